//! Unit tests of the per-client counts and of reading the forwarded client address.

use super::{ClientCounts, forwarded_client, header_read_timeout};
use axum::http::{HeaderMap, HeaderValue};
use std::net::IpAddr;
use std::time::Duration;

fn ip(text: &str) -> IpAddr {
    text.parse().unwrap_or_else(|e| panic!("{text}: {e}"))
}

#[test]
fn a_client_gets_its_limit_of_places_and_each_returned_place_can_be_taken_again() {
    let counts = ClientCounts::new(2);
    let a = ip("192.0.2.1");
    let b = ip("192.0.2.2");
    let first = counts.try_enter(a).expect("first place");
    let second = counts.try_enter(a).expect("second place");
    assert!(
        counts.try_enter(a).is_none(),
        "a third place past the limit"
    );
    // Another address has places of its own.
    let other = counts.try_enter(b).expect("another client");
    assert_eq!((counts.open(a), counts.open(b)), (2, 1));
    drop(first);
    assert_eq!(counts.open(a), 1);
    let again = counts.try_enter(a).expect("a returned place");
    drop((second, again, other));
    assert_eq!((counts.open(a), counts.open(b)), (0, 0));
}

#[track_caller]
fn check_forwarded(values: &[&str], trusted: &[&str], expected: Option<&str>) {
    let mut headers = HeaderMap::new();
    for value in values {
        headers.append(
            "x-forwarded-for",
            HeaderValue::from_str(value).expect("header"),
        );
    }
    let trusted: Vec<IpAddr> = trusted.iter().map(|t| ip(t)).collect();
    assert_eq!(forwarded_client(&headers, &trusted), expected.map(ip));
}

#[test]
fn the_forwarded_client_is_the_right_most_address_no_trusted_proxy_wrote() {
    // One proxy: the address it appended.
    check_forwarded(&["203.0.113.7"], &["10.0.0.2"], Some("203.0.113.7"));
    // A client that forges an entry cannot choose its address: the proxy's entry is right-most.
    check_forwarded(
        &["198.51.100.1, 203.0.113.7"],
        &["10.0.0.2"],
        Some("203.0.113.7"),
    );
    // Two trusted proxies in a chain: the inner one's entry is skipped.
    check_forwarded(
        &["203.0.113.7, 10.0.0.3"],
        &["10.0.0.2", "10.0.0.3"],
        Some("203.0.113.7"),
    );
    // Repeated headers are one list, in order.
    check_forwarded(&["198.51.100.1", "2001:db8::5"], &[], Some("2001:db8::5"));
    // No header, or one that is not a list of addresses: no forwarded client.
    check_forwarded(&[], &["10.0.0.2"], None);
    check_forwarded(&["unknown"], &["10.0.0.2"], None);
    check_forwarded(&["10.0.0.2"], &["10.0.0.2"], None);
}

#[test]
fn the_header_read_timeout_is_the_idle_limit_within_one_to_thirty_seconds() {
    assert_eq!(header_read_timeout(5), Duration::from_secs(5));
    assert_eq!(header_read_timeout(60), Duration::from_secs(30));
    assert_eq!(header_read_timeout(0), Duration::from_secs(1));
}
