//! Scale-out on plain MQTT: two daemons, each owning its own reactors (shards `a` and
//! `b` of one site, one prefix), behind one site mosquitto bridged to a second,
//! "central" mosquitto. Every result reaches the central broker, once per sequence
//! number after dedupe, through a restart of the central broker (and so of the bridge
//! connection); each shard keeps its own retained status.

use std::collections::{BTreeMap, BTreeSet};
use std::io::Write as _;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::time::Duration;

use serde_json::Value;

use crate::support::*;

/// Mosquitto on `port` with persistence in `dir` and `extra` configuration.
fn broker(dir: &Path, port: u16, extra: &str) -> Child {
    std::fs::create_dir_all(dir).unwrap();
    let conf = dir.join("mosquitto.conf");
    let mut f = std::fs::File::create(&conf).unwrap();
    let user = if is_root() { "user root\n" } else { "" };
    write!(
        f,
        "per_listener_settings false\nallow_anonymous true\npersistence true\n\
         persistence_location {}/\nlog_dest none\n{user}listener {port} 127.0.0.1\n{extra}",
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

fn stop(mut b: Child, port: u16) {
    let _ = Command::new("kill")
        .args(["-TERM", &b.id().to_string()])
        .status();
    let _ = b.wait();
    assert!(wait_port(port, false, Duration::from_secs(10)));
}

/// The test plant as shard `shard` owning reactor `reactor` (its topics t/<reactor>/*).
fn shard_plant(dir: &Path, port: u16, http: u16, shard: &str, reactor: &str) -> PathBuf {
    std::fs::create_dir_all(dir).unwrap();
    let config = write_lts_plant(dir, port, http, &format!("fleet-{shard}"), "");
    let text = std::fs::read_to_string(&config)
        .unwrap()
        .replacen(
            "site = \"test\"",
            &format!("site = \"test\"\nshard = \"{shard}\""),
            1,
        )
        .replace("lts1", reactor);
    std::fs::write(&config, text).unwrap();
    config
}

/// `(topic, seq)` of every result received, with how many times each came.
fn result_seqs(got: &Received) -> BTreeMap<(String, u64), usize> {
    let mut m = BTreeMap::new();
    for (t, pl, _) in got.lock().unwrap().iter() {
        if !t.ends_with("/result") {
            continue;
        }
        if let Some(seq) = serde_json::from_str::<Value>(pl)
            .ok()
            .and_then(|v| v["seq"].as_u64())
        {
            *m.entry((t.clone(), seq)).or_insert(0) += 1;
        }
    }
    m
}

fn publish_set(p: &Publisher, rt: &tokio::runtime::Runtime, reactor: &str, m: i64) {
    let s = |t: i64, v: f64, u: &str| format!(r#"{{"ts":{t},"value":{v},"unit":"{u}"}}"#);
    // docs/domain.md §8 LTS gas (dry mol%) at 220 °C, 29 barg, steam ratio 0.36312.
    p.publish(
        rt,
        &format!("t/{reactor}/ti"),
        &s(ts(m) - 60_000, 220.0, "degC"),
    );
    p.publish(
        rt,
        &format!("t/{reactor}/pi"),
        &s(ts(m) - 60_000, 29.0, "barg"),
    );
    p.publish(
        rt,
        &format!("t/{reactor}/fy"),
        &s(ts(m) - 60_000, 0.36312, "mol/mol"),
    );
    p.publish(
        rt,
        &format!("t/{reactor}/ai"),
        &format!(
            r#"{{"ts":{},"values":{{"H2":61.0536,"N2":18.98637,"CO":0.28697,"CO2":19.38096,"CH4":0.2921}},"unit":"mol%"}}"#,
            ts(m)
        ),
    );
}

#[test]
fn two_shards_behind_a_bridged_site_broker_deliver_every_result_centrally() {
    let rt = runtime();
    let dir = tempfile::tempdir().unwrap();
    let (site_port, central_port) = (free_port(), free_port());
    let central_dir = dir.path().join("central");
    let central = broker(&central_dir, central_port, "");
    let bridge = format!(
        "connection central\naddress 127.0.0.1:{central_port}\ntopic eqwatch/# out 1\n\
         cleansession false\nrestart_timeout 1 2\nbridge_protocol_version mqttv311\n\
         try_private true\nnotifications false\n"
    );
    let site = broker(&dir.path().join("site"), site_port, &bridge);
    let at_central = collector_kept(&rt, central_port, &["eqwatch/test/#"], "central-historian");
    let at_site = collector(&rt, site_port, &["eqwatch/test/#"]);

    let (http_a, http_b) = (free_port(), free_port());
    let mut a = Daemon::start(
        &shard_plant(&dir.path().join("a"), site_port, http_a, "a", "lts1"),
        http_a,
    );
    let mut b = Daemon::start(
        &shard_plant(&dir.path().join("b"), site_port, http_b, "b", "lts2"),
        http_b,
    );
    let p = Publisher::new(&rt, site_port);
    assert!(
        wait_for(&at_central, Duration::from_secs(20), |m| {
            ["a", "b"].iter().all(|s| {
                m.iter().any(|(t, pl, _)| {
                    *t == format!("eqwatch/test/status/{s}") && pl.contains("online")
                })
            })
        }),
        "both shards' status at the central broker"
    );
    for m in 0..10 {
        publish_set(&p, &rt, "lts1", m);
        publish_set(&p, &rt, "lts2", m);
    }
    assert!(wait_for(
        &at_site,
        Duration::from_secs(20),
        |_| result_seqs(&at_site).len() >= 20
    ));

    // The central broker (and with it the bridge connection) restarts while results
    // keep coming at the site.
    stop(central, central_port);
    for m in 10..20 {
        publish_set(&p, &rt, "lts1", m);
        publish_set(&p, &rt, "lts2", m);
    }
    assert!(wait_for(
        &at_site,
        Duration::from_secs(20),
        |_| result_seqs(&at_site).len() >= 40
    ));
    let central = broker(&central_dir, central_port, "");

    let want: BTreeSet<(String, u64)> = result_seqs(&at_site).into_keys().collect();
    assert_eq!(want.len(), 40, "20 results per shard at the site");
    let arrived = wait_for(&at_central, Duration::from_secs(30), |_| {
        let got = result_seqs(&at_central);
        want.iter().all(|k| got.contains_key(k))
    });
    let got = result_seqs(&at_central);
    let missing: Vec<_> = want.iter().filter(|k| !got.contains_key(*k)).collect();
    assert!(arrived, "missing at the central broker: {missing:?}");
    let duplicates: usize = got.values().map(|n| n - 1).sum();
    eprintln!(
        "fleet: {} results at the site, {} distinct at the central broker, {duplicates} duplicates (QoS 1, deduped on seq)",
        want.len(),
        got.len()
    );
    // The shards never shared a retained status.
    let statuses: BTreeSet<String> = at_central
        .lock()
        .unwrap()
        .iter()
        .filter(|(t, _, _)| t.starts_with("eqwatch/test/status"))
        .map(|(t, _, _)| t.clone())
        .collect();
    assert_eq!(
        statuses,
        ["eqwatch/test/status/a", "eqwatch/test/status/b"]
            .map(String::from)
            .into_iter()
            .collect()
    );
    a.signal("-TERM");
    b.signal("-TERM");
    assert_eq!(a.wait_exit(Duration::from_secs(20)), Some(0));
    assert_eq!(b.wait_exit(Duration::from_secs(20)), Some(0));
    stop(central, central_port);
    stop(site, site_port);
}
