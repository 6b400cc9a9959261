//! `eqwatch run` under a service manager: the notification protocol (`sd_notify(3)`:
//! READY, STATUS, WATCHDOG, RELOADING, STOPPING) read from a Unix datagram socket the
//! test binds where systemd would, and configuration reloads on SIGHUP: a good file is
//! applied (a moved input topic is followed), a bad one and one that needs a restart are
//! refused with the running configuration kept.

use std::os::unix::net::UnixDatagram;
use std::time::{Duration, Instant};

use serde_json::Value;

use crate::support::*;

/// Datagrams from the daemon, in order.
struct Manager {
    socket: UnixDatagram,
    seen: Vec<String>,
}

impl Manager {
    /// Waits for a datagram containing `what`; returns it.
    fn expect(&mut self, what: &str, within: Duration) -> String {
        let until = Instant::now() + within;
        let mut buf = [0u8; 4096];
        while Instant::now() < until {
            if let Ok(n) = self.socket.recv(&mut buf) {
                let d = String::from_utf8_lossy(&buf[..n]).into_owned();
                self.seen.push(d.clone());
                if d.contains(what) {
                    return d;
                }
            }
        }
        panic!(
            "no {what:?} from the daemon within {within:?}; seen: {:?}",
            self.seen
        );
    }
}

/// Writes `text` as the configuration, sends SIGHUP, and returns the READY datagram
/// that ends the reload (after its RELOADING).
fn reload_with(
    manager: &mut Manager,
    daemon: &Daemon,
    config: &std::path::Path,
    text: &str,
) -> String {
    std::fs::write(config, text).expect("write config");
    daemon.signal("-HUP");
    manager.expect("RELOADING=1", Duration::from_secs(5));
    manager.expect("READY=1", Duration::from_secs(5))
}

fn result_on(got: &Received, temperature_tag: &str) -> bool {
    got.lock().unwrap().iter().any(|(t, pl, _)| {
        t == "eqwatch/test/lts1/result"
            && serde_json::from_str::<Value>(pl).is_ok_and(|v| {
                v["inputs"].as_array().is_some_and(|a| {
                    a.iter()
                        .any(|i| i["tag"] == temperature_tag && i["used"] == true)
                })
            })
    })
}

#[test]
fn notify_protocol_watchdog_and_reload_on_sighup() {
    let broker = Mosquitto::start();
    let rt = runtime();
    let dir = tempfile::tempdir().expect("temp dir");
    let http = free_port();
    let config = write_lts_plant(dir.path(), broker.port, http, "svc", "");
    let sock = dir.path().join("notify.sock");
    let socket = UnixDatagram::bind(&sock).expect("bind the notification socket");
    socket
        .set_read_timeout(Some(Duration::from_millis(200)))
        .expect("timeout");
    let mut manager = Manager {
        socket,
        seen: Vec::new(),
    };
    let got = collector(&rt, broker.port, &["eqwatch/test/#"]);
    let sock_text = sock.display().to_string();
    let mut daemon = Daemon::start_env(
        &config,
        http,
        &[("NOTIFY_SOCKET", &sock_text), ("WATCHDOG_USEC", "1000000")],
    );
    let log = || std::fs::read_to_string(config.with_extension("log")).unwrap_or_default();

    // Ready once the configuration, journal and metrics port are up; a status line;
    // the watchdog fed at half its 1 s interval.
    let ready = manager.expect("READY=1", Duration::from_secs(10));
    assert!(ready.contains("STATUS="), "{ready}");
    assert!(ready.contains("1 reactors"), "{ready}");
    manager.expect("WATCHDOG=1", Duration::from_secs(3));
    manager.expect("WATCHDOG=1", Duration::from_secs(3));

    // Results flow on the configured topics.
    let publisher = Publisher::new(&rt, broker.port);
    wait_for(&got, Duration::from_secs(10), |m| {
        m.iter().any(|(t, _, _)| t == "eqwatch/test/status")
    });
    publish_lts_set_at(&publisher, &rt, 0);
    assert!(
        wait_for(&got, Duration::from_secs(10), |_| result_on(&got, "TI-3")),
        "no first result"
    );

    // 1. The engineer moves the thermocouple to a new topic and renames its tag; SIGHUP.
    let text = std::fs::read_to_string(&config).expect("config");
    let moved = text.replacen(
        "tag = \"TI-3\"\ntopic = \"t/lts1/ti\"",
        "tag = \"TI-3B\"\ntopic = \"t/lts1/ti-b\"",
        1,
    );
    assert_ne!(moved, text, "the test plant names TI-3 on t/lts1/ti");
    let done = reload_with(&mut manager, &daemon, &config, &moved);
    assert!(done.contains("configuration reloaded"), "{done}");
    assert!(log().contains("configuration reloaded"), "{}", log());
    // Readings on the new topic are used (the subscription followed the file).
    std::thread::sleep(Duration::from_millis(500));
    let s = |t: i64, v: f64, u: &str| format!(r#"{{"ts":{t},"value":{v},"unit":"{u}"}}"#);
    let m = 10;
    publisher.publish(&rt, "t/lts1/ti-b", &s(ts(m) - 60_000, 220.5, "degC"));
    publisher.publish(&rt, "t/lts1/pi", &s(ts(m) - 60_000, 29.0, "barg"));
    publisher.publish(&rt, "t/lts1/fy", &s(ts(m) - 60_000, 0.36312, "mol/mol"));
    publisher.publish(
        &rt,
        "t/lts1/ai",
        &format!(
            r#"{{"ts":{},"values":{{"H2":61.0436,"N2":18.99637,"CO":0.28697,"CO2":19.38096,"CH4":0.2921}},"unit":"mol%"}}"#,
            ts(m)
        ),
    );
    assert!(
        wait_for(&got, Duration::from_secs(10), |_| result_on(&got, "TI-3B")),
        "no result using the moved thermocouple; log:\n{}",
        log()
    );
    assert_eq!(daemon.metric("eqwatch_config_reloads_total"), 1.0);

    // 2. A broken file: refused with its errors, the running configuration kept.
    let bad = moved.replacen("unit = \"degC\"", "unit = \"degQ\"", 1);
    let refused = reload_with(&mut manager, &daemon, &config, &bad);
    assert!(refused.contains("reload refused"), "{refused}");
    assert!(
        log().contains("degQ"),
        "the error names the bad unit:\n{}",
        log()
    );
    assert_eq!(daemon.metric("eqwatch_config_reloads_refused_total"), 1.0);

    // 3. A change that needs a restart (the journal folder): refused, named.
    let other_journal = moved.replacen("dir = \"journal\"", "dir = \"journal2\"", 1);
    let refused = reload_with(&mut manager, &daemon, &config, &other_journal);
    assert!(refused.contains("needs a restart"), "{refused}");
    assert!(log().contains("[journal]"), "{}", log());
    assert_eq!(daemon.metric("eqwatch_config_reloads_refused_total"), 2.0);
    assert!(
        daemon.child.try_wait().expect("wait").is_none(),
        "still running"
    );

    // Stopping is announced.
    daemon.signal("-TERM");
    manager.expect("STOPPING=1", Duration::from_secs(5));
    assert_eq!(daemon.wait_exit(Duration::from_secs(15)), Some(0));
}
