//! Operator commands through a real mosquitto: a user not on the allow list is refused
//! (and the refusal is journaled); an allowed acknowledge and shelve change the retained
//! alarm state.

use std::path::{Path, PathBuf};
use std::time::Duration;

use serde_json::Value;

use crate::support::*;

/// One LTS (invented test plant) with a rationalised approach alarm at 10 K: the docs/domain.md
/// §8 LTS gas read at 220 °C is 12.00 K from equilibrium (Moe 1962 K; docs/domain.md §8), so the
/// first analysis raises it.
pub(crate) fn write_config(dir: &Path, port: u16, http_port: u16) -> PathBuf {
    write_lts_plant(
        dir,
        port,
        http_port,
        "alarm",
        r#"
[[reactors.lts1.alarm]]
id = "approach-high"
on = "approach"
above = "10 K"
deadband = "1 K"
priority = 2
rationale = "Invented for the test: the LTS is far from equilibrium; check the catalyst."

[commands]
allowed_users = ["op1"]
"#,
    )
}

pub(crate) fn states(got: &Received) -> Vec<Value> {
    got.lock()
        .unwrap()
        .iter()
        .filter(|(t, _, _)| t == "eqwatch/test/lts1/alarms")
        .filter_map(|(_, p, _)| serde_json::from_str(p).ok())
        .collect()
}

pub(crate) fn outcomes(got: &Received) -> Vec<Value> {
    got.lock()
        .unwrap()
        .iter()
        .filter(|(t, _, _)| t == "eqwatch/test/lts1/command/outcome")
        .filter_map(|(_, p, _)| serde_json::from_str(p).ok())
        .collect()
}

pub(crate) fn alarm_state(v: &Value) -> (String, String) {
    let a = v["alarms"]
        .as_array()
        .and_then(|a| a.iter().find(|x| x["alarm"] == "approach-high"))
        .cloned()
        .unwrap_or(Value::Null);
    (
        a["state"].as_str().unwrap_or("").to_string(),
        a["mode"].as_str().unwrap_or("").to_string(),
    )
}

#[test]
fn commands_need_an_allowed_user_and_change_the_retained_state() {
    let rt = runtime();
    let broker = Mosquitto::start();
    let dir = tempfile::tempdir().unwrap();
    let http = free_port();
    let config = write_config(dir.path(), broker.port, http);
    let got = collector(&rt, broker.port, &["eqwatch/test/#"]);
    let mut d = Daemon::start(&config, http);
    let p = Publisher::new(&rt, broker.port);
    assert!(wait_for(&got, Duration::from_secs(10), |m| m.iter().any(
        |(t, pl, _)| t == "eqwatch/test/status" && pl.contains("online")
    )));
    // docs/domain.md §8 LTS gas at 220 °C, 29 barg, steam ratio 0.36312.
    let s = |t: i64, v: f64, u: &str| format!(r#"{{"ts":{t},"value":{v},"unit":"{u}"}}"#);
    p.publish(&rt, "t/lts1/ti", &s(ts(0) - 60_000, 220.0, "degC"));
    p.publish(&rt, "t/lts1/pi", &s(ts(0) - 60_000, 29.0, "barg"));
    p.publish(&rt, "t/lts1/fy", &s(ts(0) - 60_000, 0.36312, "mol/mol"));
    p.publish(
        &rt,
        "t/lts1/ai",
        &format!(
            r#"{{"ts":{},"values":{{"H2":61.0536,"N2":18.98637,"CO":0.28697,"CO2":19.38096,"CH4":0.2921}},"unit":"mol%"}}"#,
            ts(0)
        ),
    );
    assert!(
        wait_for(&got, Duration::from_secs(10), |m| m.iter().any(
            |(t, pl, _)| t == "eqwatch/test/lts1/alarm" && pl.contains("\"raised\"")
        )),
        "alarm not raised"
    );
    assert!(wait_for(&got, Duration::from_secs(5), |_| states(&got)
        .last()
        .is_some_and(|v| alarm_state(v).0 == "unacknowledged")));

    // Not on the allow list: refused, state unchanged.
    p.publish(
        &rt,
        "eqwatch/test/lts1/command",
        r#"{"command":"acknowledge","alarm":"approach-high","user":"mallory","request_id":"r1"}"#,
    );
    assert!(wait_for(&got, Duration::from_secs(10), |_| outcomes(&got)
        .iter()
        .any(|o| o["request_id"] == "r1")));
    let o = outcomes(&got);
    let r1 = o.iter().find(|o| o["request_id"] == "r1").unwrap();
    assert_eq!(r1["outcome"], "not-allowed", "{r1}");
    assert_eq!(r1["accepted"], false);
    assert_eq!(
        alarm_state(states(&got).last().unwrap()).0,
        "unacknowledged"
    );

    // Allowed: acknowledge, then shelve for an hour with a reason.
    p.publish(
        &rt,
        "eqwatch/test/lts1/command",
        r#"{"command":"acknowledge","alarm":"approach-high","user":"op1","request_id":"r2"}"#,
    );
    assert!(wait_for(&got, Duration::from_secs(10), |_| states(&got)
        .last()
        .is_some_and(|v| alarm_state(v).0 == "acknowledged")));
    p.publish(
        &rt,
        "eqwatch/test/lts1/command",
        r#"{"command":"shelve","alarm":"approach-high","user":"op1","duration":"1 h","reason":"catalyst sampling","request_id":"r3"}"#,
    );
    assert!(wait_for(&got, Duration::from_secs(10), |_| states(&got)
        .last()
        .is_some_and(|v| alarm_state(v).1 == "shelved")));
    // A command the state does not allow is refused with the reason.
    p.publish(
        &rt,
        "eqwatch/test/lts1/command",
        r#"{"command":"acknowledge","alarm":"approach-high","user":"op1","request_id":"r4"}"#,
    );
    assert!(wait_for(&got, Duration::from_secs(10), |_| outcomes(&got)
        .iter()
        .any(|o| o["request_id"] == "r4")));
    let o = outcomes(&got);
    let find = |id: &str| o.iter().find(|x| x["request_id"] == id).unwrap().clone();
    assert_eq!(find("r2")["outcome"], "accepted");
    assert_eq!(find("r3")["outcome"], "accepted");
    assert_eq!(find("r4")["outcome"], "refused");
    assert!(find("r4")["message"].as_str().unwrap().contains("shelved"));

    // A new subscriber gets the retained state: shelved, with who and why.
    let later = collector(&rt, broker.port, &["eqwatch/test/lts1/alarms"]);
    assert!(wait_for(&later, Duration::from_secs(10), |m| m
        .iter()
        .any(|(_, pl, r)| *r && pl.contains("catalyst sampling"))));

    // Every outcome, the refusal included, is in the journal.
    std::thread::sleep(Duration::from_millis(300));
    let mut journal = String::new();
    for e in std::fs::read_dir(dir.path().join("journal")).unwrap() {
        let path = e.unwrap().path();
        if path.extension().is_some_and(|x| x == "jsonl") {
            journal.push_str(&std::fs::read_to_string(path).unwrap());
        }
    }
    assert!(
        journal.contains("not-allowed") && journal.contains("mallory"),
        "refusal not journaled"
    );
    assert!(
        journal.contains("\\\"r3\\\"") || journal.contains("\"r3\""),
        "outcome r3 not journaled"
    );

    // A restart keeps the shelf (and who and why): the first state published after it is
    // still shelved, and the still-active condition raises nothing.
    d.signal("-TERM");
    assert_eq!(d.wait_exit(Duration::from_secs(15)), Some(0));
    let seen = got.lock().unwrap().len();
    let _d2 = Daemon::start(&config, http);
    assert!(wait_for(&got, Duration::from_secs(10), |m| m[seen..]
        .iter()
        .any(|(t, _, _)| t == "eqwatch/test/lts1/alarms")));
    let after: Vec<Value> = got.lock().unwrap()[seen..]
        .iter()
        .filter(|(t, _, _)| t == "eqwatch/test/lts1/alarms")
        .filter_map(|(_, p, _)| serde_json::from_str(p).ok())
        .collect();
    assert_eq!(
        alarm_state(&after[0]),
        ("acknowledged".to_string(), "shelved".to_string()),
        "{}",
        after[0]
    );
    assert!(after[0].to_string().contains("catalyst sampling"));
    let s5 = |v: f64, u: &str| format!(r#"{{"ts":{},"value":{v},"unit":"{u}"}}"#, ts(5) - 60_000);
    p.publish(&rt, "t/lts1/ti", &s5(220.0, "degC"));
    p.publish(&rt, "t/lts1/pi", &s5(29.0, "barg"));
    p.publish(&rt, "t/lts1/fy", &s5(0.36312, "mol/mol"));
    p.publish(
        &rt,
        "t/lts1/ai",
        &format!(
            r#"{{"ts":{},"values":{{"H2":61.0536,"N2":18.98637,"CO":0.28797,"CO2":19.37996,"CH4":0.2921}},"unit":"mol%"}}"#,
            ts(5)
        ),
    );
    assert!(wait_for(&got, Duration::from_secs(10), |m| m[seen..]
        .iter()
        .any(|(t, _, _)| t == "eqwatch/test/lts1/result")));
    std::thread::sleep(Duration::from_millis(300));
    assert!(
        !got.lock().unwrap()[seen..]
            .iter()
            .any(|(t, pl, _)| t == "eqwatch/test/lts1/alarm" && pl.contains("\"raised\"")),
        "a shelved alarm was raised after the restart"
    );
}
