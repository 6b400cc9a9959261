//! The daemon behind a slow link: a loopback forwarder that holds every chunk 500 ms
//! each way (1 s round trip, as on a poor radio or satellite hop), plain and over TLS.
//! A connection in progress must be finished, not abandoned and retried: each link
//! opens one connection, and no spurious `offline` will is published.

use std::path::Path;
use std::time::Duration;

use crate::support::*;

const ONE_WAY: Duration = Duration::from_millis(500);

/// Runs the test plant on `config` (its broker reached through `link`) until a result
/// for the docs/domain.md §8 LTS set arrives on the broker's plain port `plain`.
fn one_result_through(link: &SlowLink, config: &Path, http: u16, plain: u16) {
    let rt = runtime();
    let got = collector(&rt, plain, &["eqwatch/test/#"]);
    let mut d = Daemon::start(config, http);
    assert!(
        wait_for(&got, Duration::from_secs(30), |m| m.iter().any(
            |(t, pl, _)| t == "eqwatch/test/status" && pl.contains("online")
        )),
        "no online status through a 1 s round trip ({} connections opened)",
        link.accepted()
    );
    // Both links up (the metric is 1 only when both are).
    let until = std::time::Instant::now() + Duration::from_secs(30);
    while d.metric("eqwatch_broker_connected") != 1.0 && std::time::Instant::now() < until {
        std::thread::sleep(Duration::from_millis(100));
    }
    // Subscriptions go out after the input CONNACK: give them a round trip.
    std::thread::sleep(Duration::from_secs(3));
    let p = Publisher::new(&rt, plain);
    publish_lts_set(&p, &rt);
    assert!(
        wait_for(&got, Duration::from_secs(30), |m| m
            .iter()
            .any(|(t, _, _)| t == "eqwatch/test/lts1/result")),
        "no result through a 1 s round trip ({} connections opened)",
        link.accepted()
    );
    // A further ten seconds: the links stay up and open nothing new.
    std::thread::sleep(Duration::from_secs(10));
    let offline = got
        .lock()
        .unwrap()
        .iter()
        .filter(|(t, pl, _)| t == "eqwatch/test/status" && pl.contains("offline"))
        .count();
    assert_eq!(offline, 0, "a spurious offline will was published");
    assert_eq!(
        link.accepted(),
        2,
        "one connection per link (input and results) expected"
    );
    d.signal("-TERM");
    assert_eq!(d.wait_exit(Duration::from_secs(30)), Some(0));
}

#[test]
fn a_one_second_round_trip_connects_once_per_link_and_delivers() {
    let mosquitto = Mosquitto::start();
    let link = SlowLink::start(mosquitto.port, ONE_WAY);
    let dir = tempfile::tempdir().unwrap();
    let http = free_port();
    let config = write_lts_plant(dir.path(), link.port, http, "slow", "");
    one_result_through(&link, &config, http, mosquitto.port);
}

#[test]
fn a_one_second_round_trip_over_tls_connects_once_per_link_and_delivers() {
    let dir = tempfile::tempdir().unwrap();
    let (ca, cert, key) = crate::tls::certificates();
    let (plain, tls) = (free_port(), free_port());
    let mut mosquitto = crate::tls::broker(dir.path(), plain, tls, &cert, &key);
    std::fs::write(dir.path().join("ca.pem"), &ca).unwrap();
    let link = SlowLink::start(tls, ONE_WAY);
    let http = free_port();
    let config = crate::tls::tls_plant(dir.path(), plain, link.port, http);
    one_result_through(&link, &config, http, plain);
    let _ = mosquitto.kill();
    let _ = mosquitto.wait();
}
