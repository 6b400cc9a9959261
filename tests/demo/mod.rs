//! `eqwatch demo --broker` against a separate mosquitto: every demo reactor leaves a
//! retained result with a numeric approach, and the status ends `offline`.

use std::process::Command;
use std::time::Duration;

use serde_json::Value;

use crate::support::*;

#[test]
fn demo_against_mosquitto_leaves_retained_results_and_offline_status() {
    let broker = Mosquitto::start();
    let out = Command::new(env!("CARGO_BIN_EXE_eqwatch"))
        .args([
            "demo",
            "--speed",
            "120",
            "--duration",
            "25 s",
            "--broker",
            &broker.url(),
            "--log-level",
            "error",
        ])
        .output()
        .expect("run the demo");
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{stdout}\n{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(stdout.contains("summary"), "{stdout}");
    // A new subscriber sees what the demo left behind.
    let rt = runtime();
    let got = collector(
        &rt,
        broker.port,
        &["eqwatch/baw1/+/result", "eqwatch/baw1/status"],
    );
    let units = ["ref1", "hts1", "lts1", "mth1", "amc1"];
    assert!(
        wait_for(&got, Duration::from_secs(10), |m| units.iter().all(|u| m
            .iter()
            .any(|(t, _, r)| *r && t.ends_with(&format!("{u}/result"))))
            && m.iter().any(|(t, _, _)| t.ends_with("/status"))),
        "retained messages missing"
    );
    let msgs = got.lock().unwrap().clone();
    for u in units {
        let (_, payload, _) = msgs
            .iter()
            .rev()
            .find(|(t, _, _)| t.ends_with(&format!("{u}/result")))
            .unwrap();
        let v: Value = serde_json::from_str(payload).unwrap();
        // The last analysis of a unit may be bad (e.g. right after the simulated drop-out),
        // but every unit must carry an approach figure in its retained result or in the
        // reaction list it was computed from.
        let numeric = v["approach_k"].is_f64()
            || v["reactions"]
                .as_array()
                .is_some_and(|r| r.iter().any(|x| x["approach_k"].is_f64()));
        assert!(numeric, "{u}: {v}");
    }
    let (_, status, _) = msgs
        .iter()
        .rev()
        .find(|(t, _, _)| t.ends_with("/status"))
        .unwrap();
    assert!(status.contains("\"offline\""), "{status}");
}
