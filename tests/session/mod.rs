//! The broker session: by default the daemon asks for a persistent session, so input
//! published while it is stopped, and kept by a broker that restarts with persistence,
//! is evaluated when it comes back. A clean session would have lost all of it.

use std::time::Duration;

use crate::support::*;

#[test]
fn input_published_while_the_daemon_is_down_survives_a_broker_restart() {
    let rt = runtime();
    let dir = tempfile::tempdir().unwrap();
    let port = free_port();
    let broker = persistent_broker(dir.path(), port, "");
    let http = free_port();
    // The default session settings: nothing about the session in the file.
    let config = write_lts_plant(dir.path(), port, http, "sess", "");
    let mut d = Daemon::start(&config, http);
    let until = std::time::Instant::now() + Duration::from_secs(15);
    while d.metric("eqwatch_broker_connected") != 1.0 && std::time::Instant::now() < until {
        std::thread::sleep(Duration::from_millis(100));
    }
    assert_eq!(d.metric("eqwatch_broker_connected"), 1.0);
    // Subscriptions go out right after the CONNACK.
    std::thread::sleep(Duration::from_secs(1));
    d.signal("-TERM");
    assert_eq!(d.wait_exit(Duration::from_secs(20)), Some(0));

    // Ten analyses while the daemon is stopped: the broker queues them in its session.
    let p = Publisher::new(&rt, port);
    for m in 0..10 {
        publish_lts_set_at(&p, &rt, m);
    }
    std::thread::sleep(Duration::from_secs(2));
    drop(p);
    assert!(stop_broker(broker, port));
    let broker = persistent_broker(dir.path(), port, "");

    let got = collector(&rt, port, &["eqwatch/test/#"]);
    let mut d = Daemon::start(&config, http);
    let all = wait_for(&got, Duration::from_secs(30), |_| {
        lts_analyses(&got).len() >= 10
    });
    assert!(
        all,
        "{} of 10 analyses published while the daemon was down were evaluated",
        lts_analyses(&got).len()
    );
    d.signal("-TERM");
    assert_eq!(d.wait_exit(Duration::from_secs(20)), Some(0));
    assert!(stop_broker(broker, port));
}
