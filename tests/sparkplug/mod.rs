//! Sparkplug B end to end: a real mosquitto, the real binary, and an edge node the test
//! drives (its own rumqttc client speaking protobuf). The LTS test plant's thermocouple
//! is a device metric and its pressure a node metric of edge node `G1/EN1`; the steam
//! ratio and the analysis come over plain MQTT. eqwatch publishes its results as edge
//! node `test/eqwatch`. Values are the test plant's (docs/domain.md §8 LTS gas).

use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

use eqwatch::daemon::sparkplug::Payload;
use eqwatch::daemon::sparkplug::payload::{Metric, metric};
use prost::Message as _;
use rumqttc::{AsyncClient, Event, Incoming, MqttOptions, QoS};
use serde_json::Value;

use crate::support::*;

type Raw = Arc<Mutex<Vec<(String, Vec<u8>)>>>;

/// The test's edge node: publishes protobuf, records every message it sees.
struct EdgeNode {
    client: AsyncClient,
    seen: Raw,
}

impl EdgeNode {
    fn connect(rt: &tokio::runtime::Runtime, port: u16, filters: &[&str]) -> Self {
        let mut o = MqttOptions::new(format!("test-edge-{}", free_port()), "127.0.0.1", port);
        o.set_keep_alive(Duration::from_secs(5));
        let (client, mut ev) = AsyncClient::new(o, 256);
        let seen: Raw = Arc::new(Mutex::new(Vec::new()));
        let (s, c) = (seen.clone(), client.clone());
        let filters: Vec<String> = filters.iter().map(|f| f.to_string()).collect();
        rt.spawn(async move {
            loop {
                match ev.poll().await {
                    Ok(Event::Incoming(Incoming::ConnAck(_))) => {
                        for f in &filters {
                            let _ = c.subscribe(f.clone(), QoS::AtMostOnce).await;
                        }
                    }
                    Ok(Event::Incoming(Incoming::Publish(p))) => {
                        s.lock()
                            .unwrap()
                            .push((p.topic.clone(), p.payload.to_vec()));
                    }
                    Ok(_) => {}
                    Err(_) => tokio::time::sleep(Duration::from_millis(100)).await,
                }
            }
        });
        Self { client, seen }
    }

    fn publish(&self, rt: &tokio::runtime::Runtime, topic: &str, p: Payload) {
        let c = self.client.clone();
        let t = topic.to_string();
        rt.block_on(async move {
            c.publish(t, QoS::AtMostOnce, false, p.encode_to_vec())
                .await
        })
        .expect("queue publish");
    }

    fn wait(&self, within: Duration, pred: impl Fn(&str, &Payload) -> bool) -> Option<Payload> {
        let until = Instant::now() + within;
        while Instant::now() < until {
            let found = self.seen.lock().unwrap().iter().find_map(|(t, b)| {
                let p = Payload::decode(b.as_slice()).ok()?;
                pred(t, &p).then_some(p)
            });
            if found.is_some() {
                return found;
            }
            std::thread::sleep(Duration::from_millis(50));
        }
        None
    }
}

fn double(name: Option<&str>, alias: u64, v: f64, ts: i64) -> Metric {
    Metric {
        name: name.map(str::to_string),
        alias: Some(alias),
        timestamp: Some(ts as u64),
        datatype: Some(10),
        value: Some(metric::Value::DoubleValue(v)),
        ..Metric::default()
    }
}

fn bd_seq(v: u64) -> Metric {
    Metric {
        name: Some("bdSeq".into()),
        datatype: Some(4),
        value: Some(metric::Value::LongValue(v)),
        ..Metric::default()
    }
}

fn payload(seq: Option<u64>, metrics: Vec<Metric>) -> Payload {
    Payload {
        timestamp: Some(eqwatch::daemon::now_ms() as u64),
        seq,
        metrics,
        ..Payload::default()
    }
}

fn number(m: &Metric) -> Option<f64> {
    match m.value {
        Some(metric::Value::DoubleValue(v)) => Some(v),
        Some(metric::Value::LongValue(v)) => Some(v as f64),
        _ => None,
    }
}

#[test]
fn edge_node_metrics_in_results_out_as_an_edge_node_rebirth_on_a_gap() {
    let broker = Mosquitto::start();
    let rt = runtime();
    let dir = tempfile::tempdir().expect("temp dir");
    let http = free_port();
    let config = write_lts_plant(
        dir.path(),
        broker.port,
        http,
        "spb",
        "\n[sparkplug]\ngroup_id = \"test\"\nedge_node_id = \"eqwatch\"\nreorder_timeout = \"500 ms\"\n",
    );
    let text = std::fs::read_to_string(&config).expect("config");
    let text = text
        .replacen(
            "topic = \"t/lts1/ti\"",
            "topic = \"spb:G1/EN1/LTS:TI-3\"",
            1,
        )
        .replacen("topic = \"t/lts1/pi\"", "topic = \"spb:G1/EN1:PI-3\"", 1);
    std::fs::write(&config, text).expect("write config");
    let edge = EdgeNode::connect(&rt, broker.port, &["spBv1.0/G1/NCMD/EN1", "spBv1.0/test/#"]);
    let got = collector(&rt, broker.port, &["eqwatch/test/#"]);
    let daemon = Daemon::start(&config, http);
    let log = || std::fs::read_to_string(config.with_extension("log")).unwrap_or_default();

    // eqwatch's own edge node is born: NBIRTH with bdSeq and seq 0, a DBIRTH for lts1.
    let nbirth = edge
        .wait(Duration::from_secs(10), |t, _| {
            t == "spBv1.0/test/NBIRTH/eqwatch"
        })
        .unwrap_or_else(|| panic!("no NBIRTH from eqwatch; log:\n{}", log()));
    assert_eq!(nbirth.seq, Some(0));
    assert!(
        nbirth
            .metrics
            .iter()
            .any(|m| m.name.as_deref() == Some("bdSeq"))
    );
    assert!(
        edge.wait(Duration::from_secs(5), |t, _| t
            == "spBv1.0/test/DBIRTH/eqwatch/lts1")
            .is_some()
    );
    // The host connection is subscribed once eqwatch answers a data-before-birth with a
    // rebirth request (the test node has not been born yet).
    let now = eqwatch::daemon::now_ms();
    let t0 = now - 60_000;
    let asked = |edge: &EdgeNode, n: usize| {
        edge.seen
            .lock()
            .unwrap()
            .iter()
            .filter(|(t, _)| t == "spBv1.0/G1/NCMD/EN1")
            .count()
            >= n
    };
    let until = Instant::now() + Duration::from_secs(10);
    while !asked(&edge, 1) && Instant::now() < until {
        edge.publish(
            &rt,
            "spBv1.0/G1/NDATA/EN1",
            payload(Some(5), vec![double(None, 1, 29.0, t0)]),
        );
        std::thread::sleep(Duration::from_millis(300));
    }
    assert!(
        asked(&edge, 1),
        "no rebirth request for data before a birth; log:\n{}",
        log()
    );

    // The test node is born: pressure as a node metric, the thermocouple on device LTS.
    edge.publish(
        &rt,
        "spBv1.0/G1/NBIRTH/EN1",
        payload(Some(0), vec![bd_seq(0), double(Some("PI-3"), 1, 29.0, t0)]),
    );
    edge.publish(
        &rt,
        "spBv1.0/G1/DBIRTH/EN1/LTS",
        payload(Some(1), vec![double(Some("TI-3"), 2, 220.0, t0)]),
    );
    let p = Publisher::new(&rt, broker.port);
    let s = |t: i64, v: f64, u: &str| format!(r#"{{"ts":{t},"value":{v},"unit":"{u}"}}"#);
    p.publish(&rt, "t/lts1/fy", &s(t0, 0.36312, "mol/mol"));
    std::thread::sleep(Duration::from_millis(300));
    p.publish(
        &rt,
        "t/lts1/ai",
        &format!(
            r#"{{"ts":{},"values":{{"H2":61.0536,"N2":18.98637,"CO":0.28697,"CO2":19.38096,"CH4":0.2921}},"unit":"mol%"}}"#,
            t0 + 60_000
        ),
    );
    let result = |got: &Received| -> Option<Value> {
        got.lock().unwrap().iter().rev().find_map(|(t, pl, _)| {
            (t == "eqwatch/test/lts1/result").then(|| serde_json::from_str(pl).ok())?
        })
    };
    assert!(
        wait_for(&got, Duration::from_secs(10), |_| result(&got).is_some()),
        "no result from Sparkplug inputs; log:\n{}",
        log()
    );
    let r = result(&got).expect("result");
    let used = |tag: &str| {
        r["inputs"]
            .as_array()
            .is_some_and(|a| a.iter().any(|i| i["tag"] == tag && i["used"] == true))
    };
    assert!(used("TI-3") && used("PI-3"), "{r}");
    let approach = r["approach_k"].as_f64().expect("an approach");

    // The same result as DDATA from eqwatch's edge node, by alias, with its approach.
    let ddata = edge
        .wait(Duration::from_secs(10), |t, p| {
            t == "spBv1.0/test/DDATA/eqwatch/lts1" && p.metrics.iter().any(|m| number(m).is_some())
        })
        .expect("DDATA for lts1");
    assert!(
        ddata
            .metrics
            .iter()
            .all(|m| m.name.is_none() && m.alias.is_some())
    );
    assert_eq!(number(&ddata.metrics[0]), Some(approach));

    // A gap in the test node's sequence (2 skipped): after the 500 ms reorder timeout
    // eqwatch asks for a rebirth.
    let before = edge
        .seen
        .lock()
        .unwrap()
        .iter()
        .filter(|(t, _)| t == "spBv1.0/G1/NCMD/EN1")
        .count();
    edge.publish(
        &rt,
        "spBv1.0/G1/DDATA/EN1/LTS",
        payload(Some(3), vec![double(None, 2, 221.0, now)]),
    );
    let until = Instant::now() + Duration::from_secs(5);
    while !asked(&edge, before + 1) && Instant::now() < until {
        std::thread::sleep(Duration::from_millis(50));
    }
    assert!(
        asked(&edge, before + 1),
        "no rebirth request after a gap; log:\n{}",
        log()
    );
    assert!(daemon.metric("eqwatch_sparkplug_sequence_gaps_total") >= 1.0);

    // The node dies (its NDEATH with the birth's bdSeq): counted, its metrics stale.
    edge.publish(
        &rt,
        "spBv1.0/G1/NBIRTH/EN1",
        payload(Some(0), vec![bd_seq(1), double(Some("PI-3"), 1, 29.0, now)]),
    );
    std::thread::sleep(Duration::from_millis(300));
    edge.publish(&rt, "spBv1.0/G1/NDEATH/EN1", payload(None, vec![bd_seq(1)]));
    let until = Instant::now() + Duration::from_secs(5);
    while daemon.metric("eqwatch_sparkplug_node_deaths_total") < 1.0 && Instant::now() < until {
        std::thread::sleep(Duration::from_millis(50));
    }
    assert_eq!(
        daemon.metric("eqwatch_sparkplug_node_deaths_total"),
        1.0,
        "{}",
        log()
    );
    // An analysis after the death is not computed as good on the dead node's values.
    std::thread::sleep(Duration::from_millis(300));
    let after = eqwatch::daemon::now_ms() + 1_000;
    p.publish(&rt, "t/lts1/fy", &s(after, 0.36312, "mol/mol"));
    p.publish(
        &rt,
        "t/lts1/ai",
        &format!(
            r#"{{"ts":{},"values":{{"H2":61.0436,"N2":18.99637,"CO":0.28697,"CO2":19.38096,"CH4":0.2921}},"unit":"mol%"}}"#,
            after + 60_000
        ),
    );
    let later = |got: &Received| {
        got.lock()
            .unwrap()
            .iter()
            .filter(|(t, _, _)| t == "eqwatch/test/lts1/result")
            .count()
            >= 2
    };
    assert!(
        wait_for(&got, Duration::from_secs(10), |_| later(&got)),
        "no result after the death; log:
{}",
        log()
    );
    let r = result(&got).expect("result");
    assert_ne!(
        r["quality"], "good",
        "a result on a dead node's values: {r}"
    );
}
