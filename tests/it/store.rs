//! The store on both backends: what goes in comes back, once per idempotency key, only to its
//! own lab, in keyset pages; tokens are found by secret and stop working when revoked.

use crate::on_both_backends;
use crate::support::{Backend, TestDb};
use trapwise::store::{ListFilter, NewCalibration, Store, StoredCalibration};

fn new_calibration(lab: &str, key: &str, trap: &str, created_at_ms: i64) -> NewCalibration {
    NewCalibration {
        id: uuid::Uuid::now_v7().to_string(),
        lab: lab.into(),
        idempotency_key: key.into(),
        instrument: "bench-a".into(),
        trap: trap.into(),
        note: "after realignment".into(),
        axes_labels: vec!["x".into(), "y".into()],
        file_name: "run.csv".into(),
        recording_sha256: String::new(),
        recording_size_bytes: 0,
        settings: vec![("bead_diameter_um".into(), "1".into())],
        created_at_ms,
        result_json: format!("{{\"key\":\"{key}\"}}"),
        plots_json: "{\"axes\":[]}".into(),
    }
}

/// Stages `bytes` as an upload and inserts `new` with it.
async fn insert(store: &Store, bytes: &[u8], mut new: NewCalibration) -> (StoredCalibration, bool) {
    let mut writer = store.blobs().writer().await.expect("blob writer");
    writer.write(bytes).await.expect("write");
    let staged = writer.finish().await.expect("finish");
    new.recording_sha256 = staged.sha256.clone();
    new.recording_size_bytes = staged.size_bytes;
    store
        .insert_calibration(staged, &new)
        .await
        .expect("insert calibration")
}

async fn inserted_rows_read_back_field_for_field(backend: Backend) {
    let db = TestDb::new(backend).await;
    let store = db.store().await;
    let new = new_calibration("lab-a", "k1", "t1", 1_000);
    let (stored, inserted) = insert(&store, b"time_s,x_nm\n", new.clone()).await;
    assert!(inserted);
    let by_id = store.calibration("lab-a", &new.id).await.expect("read");
    assert_eq!(by_id.as_ref(), Some(&stored));
    assert_eq!(stored.instrument, new.instrument);
    assert_eq!(stored.note, new.note);
    assert_eq!(stored.axes_labels, new.axes_labels);
    assert_eq!(stored.settings, new.settings);
    assert_eq!(stored.result_json, new.result_json);
    // SHA-256 of "time_s,x_nm\n", computed with Python's hashlib (outside the project).
    assert_eq!(
        stored.recording_sha256,
        "50618f915d3502d96cfbe05e5a7f78925627f22df56a4a593f5a430923b28b2c"
    );
    assert_eq!(
        store
            .plots_json("lab-a", &new.id)
            .await
            .expect("plots")
            .as_deref(),
        Some("{\"axes\":[]}")
    );
    let path = store
        .blobs()
        .path_of(&stored.recording_sha256)
        .expect("blob path");
    assert_eq!(std::fs::read(path).expect("blob"), b"time_s,x_nm\n");
    store.close().await;
}

async fn the_same_idempotency_key_is_stored_once(backend: Backend) {
    let db = TestDb::new(backend).await;
    let store = db.store().await;
    let (first, inserted_first) =
        insert(&store, b"abc", new_calibration("lab-a", "k", "t1", 1)).await;
    let (second, inserted_second) =
        insert(&store, b"abc", new_calibration("lab-a", "k", "t1", 2)).await;
    assert!(inserted_first);
    assert!(!inserted_second);
    assert_eq!(first, second);
    let counts = store.counts().await.expect("counts");
    assert_eq!(
        (
            counts.calibrations,
            counts.recordings,
            counts.blob_files,
            counts.temp_files
        ),
        (1, 1, 1, 0)
    );
    // The same key in another lab is another calibration; the bytes are still stored once.
    let (_, inserted_other_lab) =
        insert(&store, b"abc", new_calibration("lab-b", "k", "t1", 3)).await;
    assert!(inserted_other_lab);
    let counts = store.counts().await.expect("counts");
    assert_eq!(
        (counts.calibrations, counts.recordings, counts.blob_files),
        (2, 1, 1)
    );
    store.close().await;
}

async fn another_labs_rows_read_as_absent(backend: Backend) {
    let db = TestDb::new(backend).await;
    let store = db.store().await;
    let new = new_calibration("lab-a", "k", "t1", 5);
    insert(&store, b"abc", new.clone()).await;
    assert_eq!(
        store.calibration("lab-b", &new.id).await.expect("read"),
        None
    );
    assert_eq!(
        store.plots_json("lab-b", &new.id).await.expect("read"),
        None
    );
    assert_eq!(store.find_by_key("lab-b", "k").await.expect("read"), None);
    let filter = ListFilter {
        limit: 10,
        ..ListFilter::default()
    };
    assert!(store.list("lab-b", &filter).await.expect("list").is_empty());
    assert!(
        store
            .history("lab-b", "bench-a", "t1", None, None, 10)
            .await
            .expect("history")
            .is_empty()
    );
    store.close().await;
}

#[track_caller]
fn check_page(page: &[StoredCalibration], expected_times: &[i64]) {
    let times: Vec<i64> = page.iter().map(|c| c.created_at_ms).collect();
    assert_eq!(times, expected_times);
}

async fn listing_pages_newest_first_through_ties_and_filters(backend: Backend) {
    let db = TestDb::new(backend).await;
    let store = db.store().await;
    // Two rows share a time stamp: the id breaks the tie, so no row is lost between pages.
    for (key, trap, t) in [
        ("a", "t1", 10),
        ("b", "t2", 20),
        ("c", "t1", 20),
        ("d", "t1", 30),
    ] {
        insert(&store, key.as_bytes(), new_calibration("lab", key, trap, t)).await;
    }
    let mut filter = ListFilter {
        limit: 2,
        ..ListFilter::default()
    };
    let first = store.list("lab", &filter).await.expect("page 1");
    check_page(&first, &[30, 20]);
    let last = first.last().expect("row");
    filter.after = Some((last.created_at_ms, last.id.clone()));
    let second = store.list("lab", &filter).await.expect("page 2");
    check_page(&second, &[20, 10]);
    let mut seen: Vec<String> = first.iter().chain(&second).map(|c| c.id.clone()).collect();
    seen.sort();
    seen.dedup();
    assert_eq!(seen.len(), 4);

    let by_trap = ListFilter {
        trap: Some("t1".into()),
        limit: 10,
        ..ListFilter::default()
    };
    check_page(
        &store.list("lab", &by_trap).await.expect("list"),
        &[30, 20, 10],
    );
    let window = ListFilter {
        from_ms: Some(20),
        to_ms: Some(30),
        limit: 10,
        ..ListFilter::default()
    };
    check_page(&store.list("lab", &window).await.expect("list"), &[20, 20]);
    let history = store
        .history("lab", "bench-a", "t1", Some(15), None, 10)
        .await
        .expect("history");
    check_page(&history, &[20, 30]);
    store.close().await;
}

async fn tokens_find_their_lab_until_revoked(backend: Backend) {
    let db = TestDb::new(backend).await;
    let store = db.store().await;
    let (info, secret) = store.create_token("lab-a").await.expect("create");
    assert!(secret.starts_with("tw_") && secret.len() == 3 + 64);
    assert_eq!(
        store.lab_for_token(&secret).await.expect("lookup"),
        Some("lab-a".into())
    );
    // The stored form is the hash: presenting the hash itself is not a valid token.
    let hash = trapwise::store::sha256_text(&secret);
    assert_eq!(store.lab_for_token(&hash).await.expect("lookup"), None);
    let listed = store.tokens().await.expect("list");
    assert_eq!(listed.len(), 1);
    assert_eq!(listed[0].id, info.id);
    assert_eq!(listed[0].revoked_at_ms, None);
    assert!(store.revoke_token(&info.id).await.expect("revoke"));
    assert!(!store.revoke_token(&info.id).await.expect("revoke twice"));
    assert_eq!(store.lab_for_token(&secret).await.expect("lookup"), None);
    assert!(
        store.tokens().await.expect("list")[0]
            .revoked_at_ms
            .is_some()
    );
    store.close().await;
}

async fn reconnecting_keeps_rows_and_reapplies_no_migration(backend: Backend) {
    let db = TestDb::new(backend).await;
    let store = db.store().await;
    let new = new_calibration("lab", "k", "t1", 7);
    insert(&store, b"abc", new.clone()).await;
    store.close().await;
    let again = db.store().await;
    assert!(
        again
            .calibration("lab", &new.id)
            .await
            .expect("read")
            .is_some()
    );
    again.close().await;
}

on_both_backends!(
    inserted_rows_read_back_field_for_field,
    the_same_idempotency_key_is_stored_once,
    another_labs_rows_read_as_absent,
    listing_pages_newest_first_through_ties_and_filters,
    tokens_find_their_lab_until_revoked,
    reconnecting_keeps_rows_and_reapplies_no_migration,
);
