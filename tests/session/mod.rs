//! The broker session: by default the daemon asks for a persistent session, so input
//! published while it is stopped, and kept by a broker that restarts with persistence,
//! is evaluated when it comes back. A clean session would have lost all of it.

use std::io::Write as _;
use std::path::Path;
use std::process::{Child, Command, Stdio};
use std::time::Duration;

use serde_json::Value;

use crate::support::*;

/// Mosquitto on `port` with its database in `dir` (saved at a clean stop).
fn persistent_broker(dir: &Path, port: u16) -> Child {
    let conf = dir.join("mosquitto.conf");
    let mut f = std::fs::File::create(&conf).unwrap();
    let user = if is_root() { "user root\n" } else { "" };
    write!(
        f,
        "listener {port} 127.0.0.1\nallow_anonymous true\npersistence true\n\
         persistence_location {}/\nlog_dest none\n{user}",
        dir.display()
    )
    .unwrap();
    let child = Command::new(mosquitto_binary())
        .arg("-c")
        .arg(&conf)
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .expect("mosquitto");
    assert!(wait_port(port, true, Duration::from_secs(10)));
    child
}

/// A clean stop (SIGTERM: mosquitto writes its database), waited for.
fn stop(mut broker: Child, port: u16) {
    let _ = Command::new("kill")
        .args(["-TERM", &broker.id().to_string()])
        .status();
    let _ = broker.wait();
    assert!(wait_port(port, false, Duration::from_secs(10)));
}

/// The docs/domain.md §8 LTS gas (dry mol%) at 220 °C, 29 barg, steam ratio 0.36312, as
/// an analysis at minute `m` with its scalars one analyser lag before.
fn publish_set_at(p: &Publisher, rt: &tokio::runtime::Runtime, m: i64) {
    let s = |t: i64, v: f64, u: &str| format!(r#"{{"ts":{t},"value":{v},"unit":"{u}"}}"#);
    p.publish(rt, "t/lts1/ti", &s(ts(m) - 60_000, 220.0, "degC"));
    p.publish(rt, "t/lts1/pi", &s(ts(m) - 60_000, 29.0, "barg"));
    p.publish(rt, "t/lts1/fy", &s(ts(m) - 60_000, 0.36312, "mol/mol"));
    p.publish(
        rt,
        "t/lts1/ai",
        &format!(
            r#"{{"ts":{},"values":{{"H2":61.0536,"N2":18.98637,"CO":0.28697,"CO2":19.38096,"CH4":0.2921}},"unit":"mol%"}}"#,
            ts(m)
        ),
    );
}

/// Distinct analysis times among the results received.
fn analyses(got: &Received) -> std::collections::BTreeSet<String> {
    got.lock()
        .unwrap()
        .iter()
        .filter(|(t, _, _)| t == "eqwatch/test/lts1/result")
        .filter_map(|(_, pl, _)| serde_json::from_str::<Value>(pl).ok())
        .filter_map(|v| v.get("analysis_ts").map(Value::to_string))
        .collect()
}

#[test]
fn input_published_while_the_daemon_is_down_survives_a_broker_restart() {
    let rt = runtime();
    let dir = tempfile::tempdir().unwrap();
    let port = free_port();
    let broker = persistent_broker(dir.path(), port);
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
        publish_set_at(&p, &rt, m);
    }
    std::thread::sleep(Duration::from_secs(2));
    drop(p);
    stop(broker, port);
    let broker = persistent_broker(dir.path(), port);

    let got = collector(&rt, port, &["eqwatch/test/#"]);
    let mut d = Daemon::start(&config, http);
    let all = wait_for(&got, Duration::from_secs(30), |_| {
        analyses(&got).len() >= 10
    });
    assert!(
        all,
        "{} of 10 analyses published while the daemon was down were evaluated",
        analyses(&got).len()
    );
    d.signal("-TERM");
    assert_eq!(d.wait_exit(Duration::from_secs(20)), Some(0));
    stop(broker, port);
}
