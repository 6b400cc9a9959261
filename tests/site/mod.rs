//! The site example in `deploy/mosquitto/` against a real mosquitto started from it:
//! TLS only, a password file made by the test (`mosquitto_passwd`), the shipped ACL
//! (with the test plant's site and topic names put in), certificates made by the test.
//! Right credentials work; a wrong password is refused with a clear message and slow
//! retries; a command from an account the ACL does not allow never reaches eqwatch, so
//! it never changes an alarm; nobody but eqwatch can publish on its output topics; the
//! password is never in the log or in `check`.

use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

use crate::alarms::{alarm_state, outcomes, states};
use crate::support::*;

const EQWATCH_PASS: &str = "eq-Secret-4711";

/// The shipped mosquitto.conf with the test's paths and port, plus a plain loopback
/// listener for the test's own clients (same password file and ACL: the shipped file
/// sets `per_listener_settings false`).
fn site_broker(dir: &Path, tls: u16, plain: u16, cert: &str, key: &str) -> Child {
    let repo = Path::new(env!("CARGO_MANIFEST_DIR")).join("deploy/mosquitto");
    std::fs::write(dir.join("server.pem"), cert).unwrap();
    std::fs::write(dir.join("server.key"), key).unwrap();
    let acl = std::fs::read_to_string(repo.join("eqwatch.acl"))
        .unwrap()
        .replace("eqwatch/baw1/", "eqwatch/test/")
        .replace("baw1/#", "t/#")
        .replace("user op-demo", "user op1");
    std::fs::write(dir.join("eqwatch.acl"), acl).unwrap();
    let passwd = dir.join("passwd");
    std::fs::write(&passwd, "").unwrap();
    for (user, pass) in [
        ("eqwatch", EQWATCH_PASS),
        ("gateway", "gw-pass"),
        ("op1", "op-pass"),
        ("historian", "hist-pass"),
    ] {
        let ok = Command::new("mosquitto_passwd")
            .args(["-b"])
            .arg(&passwd)
            .args([user, pass])
            .status()
            .expect("mosquitto_passwd (Debian package mosquitto)");
        assert!(ok.success());
    }
    let shipped = std::fs::read_to_string(repo.join("mosquitto.conf")).unwrap();
    let d = dir.display();
    let mut conf = String::new();
    for (from, to) in [
        ("listener 8883 0.0.0.0", format!("listener {tls} 127.0.0.1")),
        ("/var/lib/mosquitto/", format!("{d}/")),
        ("/etc/mosquitto/certs/ca.crt", format!("{d}/ca.pem")),
        ("/etc/mosquitto/certs/broker.crt", format!("{d}/server.pem")),
        ("/etc/mosquitto/certs/broker.key", format!("{d}/server.key")),
        ("/etc/mosquitto/passwd", format!("{d}/passwd")),
        ("/etc/mosquitto/eqwatch.acl", format!("{d}/eqwatch.acl")),
    ] {
        assert!(
            shipped.contains(from) || conf.contains(from),
            "deploy/mosquitto/mosquitto.conf no longer has {from:?}"
        );
        conf = if conf.is_empty() {
            shipped.clone()
        } else {
            conf
        };
        conf = conf.replace(from, &to);
    }
    let user = if is_root() { "user root\n" } else { "" };
    conf.push_str(&format!(
        "log_dest none\n{user}listener {plain} 127.0.0.1\n"
    ));
    let path = dir.join("mosquitto.conf");
    std::fs::write(&path, conf).unwrap();
    let child = Command::new(mosquitto_binary())
        .arg("-c")
        .arg(&path)
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .expect("mosquitto");
    assert!(wait_port(tls, true, Duration::from_secs(10)));
    assert!(wait_port(plain, true, Duration::from_secs(10)));
    child
}

/// The alarm test plant over TLS, logged in as eqwatch with the password in a file.
fn site_plant(dir: &Path, plain: u16, tls: u16, http: u16, password: &str) -> PathBuf {
    let config = crate::alarms::write_config(dir, plain, http);
    std::fs::write(dir.join("broker.pass"), format!("{password}\n")).unwrap();
    let text = std::fs::read_to_string(&config).unwrap().replacen(
        &format!("url = \"mqtt://127.0.0.1:{plain}\""),
        &format!(
            "url = \"mqtts://127.0.0.1:{tls}\"\nca_file = \"ca.pem\"\nusername = \"eqwatch\"\npassword_file = \"broker.pass\""
        ),
        1,
    );
    std::fs::write(&config, text).unwrap();
    config
}

fn wait_metric(d: &Daemon, name: &str, value: f64, within: Duration) -> bool {
    let until = Instant::now() + within;
    while Instant::now() < until {
        if d.metric(name) == value {
            return true;
        }
        std::thread::sleep(Duration::from_millis(100));
    }
    false
}

#[test]
fn the_site_example_lets_the_right_accounts_in_and_keeps_the_others_out() {
    let rt = runtime();
    let dir = tempfile::tempdir().unwrap();
    let (ca, cert, key) = crate::tls::certificates();
    std::fs::write(dir.path().join("ca.pem"), &ca).unwrap();
    let (tls, plain) = (free_port(), free_port());
    let mut broker = site_broker(dir.path(), tls, plain, &cert, &key);
    let http = free_port();
    let config = site_plant(dir.path(), plain, tls, http, EQWATCH_PASS);

    // `check` shows the login without the password.
    let check = Command::new(env!("CARGO_BIN_EXE_eqwatch"))
        .args(["check", "--config"])
        .arg(&config)
        .output()
        .unwrap();
    let shown = String::from_utf8_lossy(&check.stdout).to_string()
        + &String::from_utf8_lossy(&check.stderr);
    assert!(check.status.success(), "{shown}");
    assert!(shown.contains("user eqwatch with a password"), "{shown}");
    assert!(!shown.contains(EQWATCH_PASS), "check shows the password");

    let got = collector_as(
        &rt,
        plain,
        &["eqwatch/test/#"],
        Some(("historian", "hist-pass")),
    );
    let mut d = Daemon::start(&config, http);
    assert!(
        wait_metric(&d, "eqwatch_broker_connected", 1.0, Duration::from_secs(15)),
        "eqwatch did not connect with the right password over TLS"
    );
    std::thread::sleep(Duration::from_secs(1));
    let gateway = Publisher::new_as(&rt, plain, Some(("gateway", "gw-pass")));
    publish_lts_set(&gateway, &rt);
    assert!(
        wait_for(&got, Duration::from_secs(15), |_| states(&got)
            .last()
            .is_some_and(|v| alarm_state(v).0 == "unacknowledged")),
        "the approach alarm was not raised"
    );

    // A forged command (the allowed user's name in the payload) from an account the ACL
    // does not allow to publish commands: the broker drops it; nothing changes.
    let historian = Publisher::new_as(&rt, plain, Some(("historian", "hist-pass")));
    historian.publish(
        &rt,
        "eqwatch/test/lts1/command",
        r#"{"command":"acknowledge","alarm":"approach-high","user":"op1","request_id":"forged"}"#,
    );
    // And a fake result from the gateway on eqwatch's output topic.
    gateway.publish(&rt, "eqwatch/test/lts1/result", r#"{"fake":true}"#);
    std::thread::sleep(Duration::from_secs(3));
    assert!(
        !outcomes(&got).iter().any(|o| o["request_id"] == "forged"),
        "a command from a read-only account reached eqwatch"
    );
    assert_eq!(
        alarm_state(states(&got).last().unwrap()).0,
        "unacknowledged"
    );
    assert!(
        !got.lock()
            .unwrap()
            .iter()
            .any(|(_, p, _)| p.contains("fake")),
        "another account published on eqwatch's output topic"
    );

    // The operator account: the same command is carried out.
    let op = Publisher::new_as(&rt, plain, Some(("op1", "op-pass")));
    op.publish(
        &rt,
        "eqwatch/test/lts1/command",
        r#"{"command":"acknowledge","alarm":"approach-high","user":"op1","request_id":"real"}"#,
    );
    assert!(
        wait_for(&got, Duration::from_secs(10), |_| outcomes(&got)
            .iter()
            .any(|o| o["request_id"] == "real" && o["outcome"] == "accepted")),
        "the operator's command was not accepted"
    );
    assert!(wait_for(&got, Duration::from_secs(5), |_| states(&got)
        .last()
        .is_some_and(|v| alarm_state(v).0 == "acknowledged")));
    d.signal("-TERM");
    assert_eq!(d.wait_exit(Duration::from_secs(20)), Some(0));

    // A wrong password: refused, said plainly, retried slowly (reconnect_max is 1 s in
    // the test plant: at most one attempt a second per connection, where the growing
    // backoff from 100 ms would try about twice as often).
    let http = free_port();
    let config = site_plant(dir.path(), plain, tls, http, "wrong-password");
    let d = Daemon::start(&config, http);
    std::thread::sleep(Duration::from_secs(6));
    assert_eq!(d.metric("eqwatch_broker_connected"), 0.0);
    let attempts =
        d.metric("eqwatch_reconnects_total") + d.metric("eqwatch_input_reconnects_total");
    drop(d);
    let log = std::fs::read_to_string(config.with_extension("log")).unwrap_or_default();
    assert!(
        log.contains("refused the user name or password"),
        "no clear refusal message:\n{log}"
    );
    eprintln!(
        "wrong password: {attempts} attempts in 6 s; first refusal line:\n{}",
        log.lines().find(|l| l.contains("refused")).unwrap_or("")
    );
    assert!(
        attempts <= 14.0,
        "{attempts} attempts in 6 s over two connections"
    );
    for pass in [EQWATCH_PASS, "wrong-password"] {
        assert!(!log.contains(pass), "the log shows a password");
    }
    let _ = broker.kill();
    let _ = broker.wait();
}
