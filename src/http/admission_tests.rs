//! Unit tests of the admission gate: places are counted exactly and given back on drop.

use super::Admission;

#[track_caller]
fn check(admission: &std::sync::Arc<Admission>, expected_admitted: bool) -> Option<super::Place> {
    let place = admission.try_enter();
    assert_eq!(place.is_some(), expected_admitted);
    place
}

#[test]
fn gate_admits_running_plus_queue_places_and_refuses_the_next() {
    let admission = Admission::new(1, 1);
    let first = check(&admission, true);
    let second = check(&admission, true);
    check(&admission, false);
    drop(first);
    let third = check(&admission, true);
    check(&admission, false);
    drop((second, third));
    check(&admission, true);
}

#[test]
fn gate_without_places_refuses_everything() {
    let admission = Admission::new(0, 0);
    check(&admission, false);
    assert_eq!(admission.capacity(), 0);
}

#[tokio::test]
async fn queue_depth_counts_places_waiting_for_a_slot() {
    let admission = Admission::new(1, 2);
    let running = check(&admission, true).unwrap_or_else(|| unreachable!());
    let permit = running.slot().await;
    assert!(permit.is_some());
    let _waiting = check(&admission, true);
    assert_eq!(admission.queue_depth(), 1);
    drop(permit);
    drop(running);
    assert_eq!(admission.queue_depth(), 1);
}
