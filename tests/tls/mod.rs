//! The daemon over TLS (`mqtts://`, rustls on the ring provider) to a real mosquitto
//! with a TLS listener, certificates made by the test (rcgen); the test's own publisher
//! and collector use a plain loopback listener of the same broker.

use std::io::Write as _;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::time::Duration;

use crate::support::*;

/// A throw-away CA and a server certificate for 127.0.0.1, as PEM: (ca, cert, key).
pub(crate) fn certificates() -> (String, String, String) {
    let ca_key = rcgen::KeyPair::generate().expect("CA key");
    let mut ca = rcgen::CertificateParams::new(Vec::<String>::new()).expect("CA params");
    ca.is_ca = rcgen::IsCa::Ca(rcgen::BasicConstraints::Unconstrained);
    ca.distinguished_name
        .push(rcgen::DnType::CommonName, "eqwatch test CA");
    let ca_cert = ca.self_signed(&ca_key).expect("CA certificate");
    let key = rcgen::KeyPair::generate().expect("server key");
    let server =
        rcgen::CertificateParams::new(vec!["127.0.0.1".to_string()]).expect("server params");
    let cert = server
        .signed_by(&key, &ca_cert, &ca_key)
        .expect("server certificate");
    (ca_cert.pem(), cert.pem(), key.serialize_pem())
}

/// Mosquitto with a plain listener on `plain` and a TLS one on `tls`.
pub(crate) fn broker(dir: &Path, plain: u16, tls: u16, cert: &str, key: &str) -> Child {
    std::fs::write(dir.join("server.pem"), cert).unwrap();
    std::fs::write(dir.join("server.key"), key).unwrap();
    let conf = dir.join("mosquitto.conf");
    let mut f = std::fs::File::create(&conf).unwrap();
    let user = if is_root() { "user root\n" } else { "" };
    write!(
        f,
        "per_listener_settings false\nallow_anonymous true\npersistence false\nlog_dest none\n{user}\
         listener {plain} 127.0.0.1\n\
         listener {tls} 127.0.0.1\ncertfile {}\nkeyfile {}\n",
        dir.join("server.pem").display(),
        dir.join("server.key").display()
    )
    .unwrap();
    let child = Command::new(mosquitto_binary())
        .arg("-c")
        .arg(&conf)
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .expect("mosquitto");
    assert!(wait_port(plain, true, Duration::from_secs(10)));
    assert!(wait_port(tls, true, Duration::from_secs(10)));
    child
}

/// The test plant, talking to the broker's TLS listener with `ca.pem` as its CA file.
pub(crate) fn tls_plant(dir: &Path, plain: u16, tls: u16, http: u16) -> PathBuf {
    let config = write_lts_plant(dir, plain, http, "tls", "");
    let text = std::fs::read_to_string(&config).unwrap().replacen(
        &format!("url = \"mqtt://127.0.0.1:{plain}\""),
        &format!("url = \"mqtts://127.0.0.1:{tls}\"\nca_file = \"ca.pem\""),
        1,
    );
    std::fs::write(&config, text).unwrap();
    config
}

#[test]
fn results_arrive_over_tls_and_a_ca_that_did_not_sign_the_broker_is_refused() {
    let rt = runtime();
    let dir = tempfile::tempdir().unwrap();
    let (ca, cert, key) = certificates();
    let (plain, tls) = (free_port(), free_port());
    let mut mosquitto = broker(dir.path(), plain, tls, &cert, &key);
    std::fs::write(dir.path().join("ca.pem"), &ca).unwrap();
    let http = free_port();
    let config = tls_plant(dir.path(), plain, tls, http);
    let got = collector(&rt, plain, &["eqwatch/test/#"]);
    let mut d = Daemon::start(&config, http);
    assert!(
        wait_for(&got, Duration::from_secs(15), |m| m.iter().any(
            |(t, pl, _)| t == "eqwatch/test/status" && pl.contains("online")
        )),
        "no online status over TLS"
    );
    // docs/domain.md §8 LTS gas at 220 °C, 29 barg, steam ratio 0.36312.
    let p = Publisher::new(&rt, plain);
    publish_lts_set(&p, &rt);
    assert!(
        wait_for(&got, Duration::from_secs(15), |m| m
            .iter()
            .any(|(t, _, _)| t == "eqwatch/test/lts1/result")),
        "no result over TLS"
    );
    d.signal("-TERM");
    assert_eq!(d.wait_exit(Duration::from_secs(20)), Some(0));

    // A CA that did not sign the broker's certificate: never connected, and the log
    // says it is the certificate.
    let (other_ca, _, _) = certificates();
    std::fs::write(dir.path().join("ca.pem"), &other_ca).unwrap();
    let http = free_port();
    let config = tls_plant(dir.path(), plain, tls, http);
    let mut d = Daemon::start(&config, http);
    std::thread::sleep(Duration::from_secs(3));
    assert_eq!(d.metric("eqwatch_broker_connected"), 0.0);
    d.signal("-TERM");
    let _ = d.wait_exit(Duration::from_secs(20));
    let log = std::fs::read_to_string(config.with_extension("log")).unwrap_or_default();
    assert!(
        log.to_ascii_lowercase().contains("certificate"),
        "the log does not name the certificate:\n{log}"
    );
    let _ = mosquitto.kill();
    let _ = mosquitto.wait();
}
