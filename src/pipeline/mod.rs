//! The processing path, synchronous and deterministic: route a message to its reactors,
//! decode it ([`crate::wire`]), hand it to the reactor's monitor, run the watch (drift,
//! alerts, alarms) over each evaluation, carry out operator commands, and produce the
//! records to journal and publish. The live daemon feeds it MQTT messages; `eqwatch
//! replay` feeds it CSV rows, so both take the same path after decoding.
//!
//! Rules of this folder (checked by `tests/architecture.rs`): no tokio, no rumqttc, no
//! file or network I/O, no clock (every function takes the time it needs). It may use
//! the core, [`crate::config`] (validated settings) and [`crate::wire`]; never
//! `crate::daemon`, `crate::replay`, `crate::demo`, `crate::plot` or `crate::cli`.
//! Logging goes through the `tracing` facade only.

// Without the daemon (`--features cli`: replay only) the MQTT entry points (routing,
// raw messages, commands) have no caller.
#![cfg_attr(not(feature = "daemon"), allow(dead_code))]

mod command;
pub(crate) mod engine;
mod lane;
pub(crate) mod metrics;
mod plant;
pub(crate) mod reload;
mod route;
mod throttle;
pub(crate) mod trace;

pub(crate) use engine::Engine;
pub(crate) use lane::{Lane, Sink};
pub(crate) use plant::Plant;
pub(crate) use trace::{Trace, expand};

/// A message as it came from the broker (or a test).
#[derive(Debug, Clone)]
pub struct RawInput {
    pub topic: String,
    pub payload: Vec<u8>,
    pub arrival_ms: i64,
}

/// One record to journal.
#[derive(Debug)]
pub struct Append {
    pub topic: String,
    pub retain: bool,
    pub payload: String,
    /// A result's headline as typed figures (what its text says), for the live page's
    /// trend; `None` for every other record.
    pub point: Option<crate::wire::result::HeadlinePoint>,
}

#[cfg(test)]
mod tests {
    //! The pipeline driven directly, without a broker or the binary: messages in,
    //! records and counters out. The plant is the invented demo plant
    //! (config/demo-plant.toml); every value below is invented for the test.

    use std::sync::Arc;
    use std::sync::atomic::Ordering::Relaxed;

    use serde_json::Value;

    use super::metrics::Metrics;
    use super::{Append, Engine, RawInput};
    use crate::wire::watch::Verdict;

    const T0_MS: i64 = 1_796_083_200_000; // 2026-12-01T00:00:00Z

    fn engine() -> (Engine, Arc<Metrics>) {
        engine_with(false)
    }

    /// The demo plant's engine, with or without `metrics_topic = true`.
    fn engine_with(metrics_topic: bool) -> (Engine, Arc<Metrics>) {
        let text = include_str!("../../config/demo-plant.toml");
        let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("config");
        let mut settings =
            crate::config::from_str(text, &dir).expect("demo configuration is valid");
        settings.metrics_topic = metrics_topic;
        let ids: Vec<String> = settings
            .reactors
            .iter()
            .map(|r| r.spec.id.clone())
            .collect();
        let metrics = Arc::new(Metrics::new(&ids));
        let engine = Engine::new(Arc::new(settings), Arc::clone(&metrics)).expect("engine");
        (engine, metrics)
    }

    fn send(engine: &mut Engine, topic: &str, payload: &str, at_ms: i64) -> Vec<Append> {
        let raw = RawInput {
            topic: topic.into(),
            payload: payload.as_bytes().to_vec(),
            arrival_ms: at_ms,
        };
        let mut out = Vec::new();
        engine.message(&raw, at_ms, &mut out);
        out
    }

    fn json(a: &Append) -> Value {
        serde_json::from_str(&a.payload).expect("records are JSON")
    }

    fn outcome_of(records: &[Append]) -> Value {
        let o = records
            .iter()
            .find(|a| a.topic.ends_with("/command/outcome"))
            .expect("an outcome record");
        json(o)
    }

    #[test]
    fn an_unrouted_topic_is_counted_and_makes_nothing() {
        let (mut e, m) = engine();
        assert!(send(&mut e, "baw1/nowhere", "1", T0_MS).is_empty());
        assert_eq!(m.unrouted.load(Relaxed), 1);
    }

    #[test]
    fn a_bad_reading_is_counted_by_reason_and_makes_no_result() {
        let (mut e, m) = engine();
        let out = send(&mut e, "baw1/hts1/TI-205", "{\"value\":\"hot\"}", T0_MS);
        assert!(out.is_empty());
        let reasons = crate::wire::input::DecodeError::REASONS;
        let i = reasons
            .iter()
            .position(|r| *r == "not_numeric")
            .expect("reason");
        assert_eq!(m.decode_failures[i].load(Relaxed), 1);
    }

    #[test]
    fn a_complete_set_of_readings_gives_one_retained_result() {
        let (mut e, _m) = engine();
        let t = T0_MS;
        // HTS outlet: invented dry analysis near equilibrium at 430 degC, 30 barg.
        for (topic, payload) in [
            (
                "baw1/hts1/TI-205",
                format!(r#"{{"ts":{t},"value":430,"unit":"degC"}}"#),
            ),
            (
                "baw1/hts1/PI-202",
                format!(r#"{{"ts":{t},"value":30,"unit":"barg"}}"#),
            ),
        ] {
            assert!(send(&mut e, topic, &payload, t).is_empty());
        }
        let analysis = format!(
            r#"{{"ts":{t},"values":{{"H2":56.0,"N2":20.0,"CO":3.5,"CO2":16.0,"CH4":0.3,"Ar":0.2}},"unit":"mol%"}}"#
        );
        // Reported one lag (60 s) after its sample time.
        let out = send(&mut e, "baw1/hts1/AI-201", &analysis, t + 60_000);
        let results: Vec<&Append> = out
            .iter()
            .filter(|a| a.topic.ends_with("/result"))
            .collect();
        assert_eq!(results.len(), 1, "{out:?}");
        assert!(results[0].retain);
        let v = json(results[0]);
        assert_eq!(v["reactor"], "hts1");
        assert!(v["quality"].is_string(), "{v}");
    }

    /// lts1's inputs for one sample at `t` (invented, consistent across the bed): outlet
    /// dry mol % H2 60.9, N2 18.9, CO 0.29, CO2 19.31, CH4 0.3, Ar 0.3 at 2500 kmol/h
    /// dry with 900 kmol/h water; the inlet is that gas with a shift extent of 70 kmol/h
    /// reversed (derived by hand: CO +70, CO2 −70, H2 −70, H2O +70 kmol/h), i.e. 2430
    /// kmol/h dry of H2 1452.5, N2 472.5, CO 77.25, CO2 412.75, CH4 7.5, Ar 7.5 kmol/h
    /// with 970 kmol/h steam. `inlet_co_scale` multiplies the inlet analyser's CO.
    fn lts1_sample(e: &mut Engine, t: i64, inlet_co_scale: f64) -> Vec<Append> {
        let scalar = |v: f64, unit: &str| format!(r#"{{"ts":{t},"value":{v},"unit":"{unit}"}}"#);
        let mut inputs = vec![
            ("baw1/lts1/TI-305A", scalar(220.0, "degC")),
            ("baw1/lts1/TI-305B", scalar(220.2, "degC")),
            ("baw1/lts1/PI-302", scalar(28.0, "barg")),
            ("baw1/lts1/FY-310", format!(r#"{{"ts":{t},"value":0.36}}"#)),
            ("baw1/lts1/FI-301", scalar(2430.0, "kmol/h")),
            ("baw1/lts1/FI-302", scalar(2500.0, "kmol/h")),
            ("baw1/lts1/FI-303", scalar(970.0, "kmol/h")),
        ];
        // Bed thermocouples 0 to 3.2 m: a 22 K rise, most of it in the top metre.
        for (tag, c) in [
            ("A", 198.0),
            ("B", 214.0),
            ("C", 218.8),
            ("D", 219.8),
            ("E", 220.0),
        ] {
            inputs.push((
                match tag {
                    "A" => "baw1/lts1/TI-306A",
                    "B" => "baw1/lts1/TI-306B",
                    "C" => "baw1/lts1/TI-306C",
                    "D" => "baw1/lts1/TI-306D",
                    _ => "baw1/lts1/TI-306E",
                },
                scalar(c, "degC"),
            ));
        }
        for (topic, payload) in &inputs {
            send(e, topic, payload, t);
        }
        let pct = |kmol: f64, total: f64| 100.0 * kmol / total;
        let co = pct(77.25, 2430.0) * inlet_co_scale;
        let inlet = format!(
            r#"{{"ts":{},"values":{{"H2":{},"N2":{},"CO":{co},"CO2":{},"CH4":{},"Ar":{}}},"unit":"mol%"}}"#,
            t + 60_000,
            pct(1452.5, 2430.0),
            pct(472.5, 2430.0),
            pct(412.75, 2430.0),
            pct(7.5, 2430.0),
            pct(7.5, 2430.0),
        );
        send(e, "baw1/lts1/AI-300", &inlet, t + 60_000);
        // The outlet's last digits move from sample to sample (a live analyser never
        // repeats every digit; three identical analyses are a stuck analyser).
        let wobble = 1e-4 * (((t - T0_MS) / 300_000) % 7) as f64;
        let outlet = format!(
            r#"{{"ts":{},"values":{{"H2":{},"N2":{},"CO":0.29,"CO2":19.31,"CH4":0.3,"Ar":0.3}},"unit":"mol%"}}"#,
            t + 60_000,
            60.9 + wobble,
            18.9 - wobble
        );
        send(e, "baw1/lts1/AI-301", &outlet, t + 60_000)
    }

    fn lts1_result(out: &[Append]) -> Value {
        let r = out
            .iter()
            .find(|a| a.topic.ends_with("lts1/result"))
            .expect("an lts1 result");
        json(r)
    }

    #[test]
    fn consistent_inlet_and_outlet_reconcile_and_a_drifting_analyser_is_named() {
        let (mut e, _m) = engine();
        // No wobble on the first sample (at T0).
        let out = lts1_sample(&mut e, T0_MS, 1.0);
        // lts1 is in the demo's shift train: its summary follows the result, retained,
        // waiting for hts1's first result.
        let train = out
            .iter()
            .find(|a| a.topic == "eqwatch/baw1/train/shift")
            .expect("the train summary");
        assert!(train.retain);
        let t = json(train);
        assert_eq!(t["quality"], "no-result", "{t}");
        assert_eq!(t["members"][0]["reactor"], "lts1");
        assert_eq!(t["members"][0]["balances"], "pass");
        let v = lts1_result(&out);
        let rc = &v["reconciliation"];
        assert_eq!(rc["available"], true, "{rc}");
        // Balanced by construction: every element closes before and after.
        for el in rc["elements"].as_array().expect("elements") {
            let before = el["imbalance_pct_measured"].as_f64().expect("number");
            assert!(before.abs() < 1e-6, "{el}");
            assert!(
                el["imbalance_pct_reconciled"]
                    .as_f64()
                    .expect("number")
                    .abs()
                    < 1e-9
            );
        }
        assert_eq!(rc["global_test"]["passed"], true);
        assert!(rc["suspect"].is_null());
        // The reconciled gas is the measured one: the same approach.
        let raw = v["reactions"][0]["approach_k"].as_f64().expect("approach");
        let rec = rc["approach_k"][0].as_f64().expect("reconciled approach");
        assert!((raw - rec).abs() < 1e-3, "{raw} vs {rec}");
        // The reconciled outlet S/D is the 900/2500 of the construction.
        assert!((rc["steam_ratio_out"].as_f64().expect("S/D") - 0.36).abs() < 1e-6);
        // The bed profile of the same sample: 22 K rise, the front in the top metre.
        let bed = &v["bed_profile"];
        assert!(
            (bed["rise_k"].as_f64().expect("rise") - 22.0).abs() < 1e-9,
            "{bed}"
        );
        let front = bed["front_depth_m"].as_f64().expect("front");
        assert!(front > 0.8 && front < 1.6, "{front}");

        // Inlet CO reading 20 % high (an invented calibration error): the balances fail
        // and the measurement test names the inlet analyser's CO.
        let v = lts1_result(&lts1_sample(&mut e, T0_MS + 300_000, 1.2));
        let rc = &v["reconciliation"];
        assert_eq!(rc["global_test"]["passed"], false, "{rc}");
        let mut named: Vec<String> = vec![rc["suspect"].as_str().unwrap_or("").to_string()];
        for t in rc["suspect_equivalents"].as_array().into_iter().flatten() {
            named.push(t.as_str().unwrap_or("").to_string());
        }
        assert!(named.iter().any(|t| t == "BAW1-AI-300 CO"), "{rc}");
    }

    #[test]
    fn a_gross_error_three_results_in_a_row_raises_the_alert_and_no_sooner() {
        let (mut e, _m) = engine();
        let mut raised = Vec::new();
        for k in 0..4 {
            let out = lts1_sample(&mut e, T0_MS + k * 300_000, 1.2);
            raised.push(out.iter().any(|a| {
                a.topic.ends_with("lts1/alert")
                    && a.payload.contains("\"gross-error\"")
                    && a.payload.contains("\"raised\"")
            }));
        }
        assert_eq!(raised, vec![false, false, true, false]);
    }

    /// Three hts1 analyses five minutes apart (invented dry gas summing to 100 mol% at
    /// 430 degC, 30 barg; CO moves a little so the analyser does not look stuck), with
    /// temperature and pressure at the sample time (the analysis time minus hts1's
    /// 60 s lag, config/demo-plant.toml) and at the analysis time.
    fn three_hts1_analyses(e: &mut Engine) -> Vec<Append> {
        let mut out = Vec::new();
        for k in 0..3i64 {
            let t = T0_MS + k * 300_000;
            for at in [t - 60_000, t] {
                for (topic, payload) in [
                    (
                        "baw1/hts1/TI-205",
                        format!(r#"{{"ts":{at},"value":430,"unit":"degC"}}"#),
                    ),
                    (
                        "baw1/hts1/PI-202",
                        format!(r#"{{"ts":{at},"value":30,"unit":"barg"}}"#),
                    ),
                ] {
                    out.extend(send(e, topic, &payload, at));
                }
            }
            let co = 3.5 + 0.01 * k as f64;
            let co2 = 16.0 - 0.01 * k as f64;
            let analysis = format!(
                r#"{{"ts":{t},"values":{{"H2":60.0,"N2":20.0,"CO":{co},"CO2":{co2},"CH4":0.3,"Ar":0.2}},"unit":"mol%"}}"#
            );
            out.extend(send(e, "baw1/hts1/AI-201", &analysis, t));
        }
        out
    }

    #[test]
    fn with_the_metrics_topic_each_result_is_followed_by_its_metrics_message() {
        let (mut e, _m) = engine_with(true);
        let out = three_hts1_analyses(&mut e);
        let results: Vec<usize> = (0..out.len())
            .filter(|&i| out[i].topic.ends_with("/result"))
            .collect();
        assert_eq!(results.len(), 3, "{out:?}");
        assert_eq!(
            out.iter().filter(|a| a.topic.ends_with("/metrics")).count(),
            3
        );
        for i in results {
            let m = out.get(i + 1).expect("a record after the result");
            assert_eq!(m.topic, "eqwatch/baw1/hts1/metrics");
            assert!(!m.retain, "metrics are not retained");
            let (r, m) = (json(&out[i]), json(m));
            // Derived from the result above: the sample time and the approach.
            let sample_ms =
                crate::timefmt::parse_rfc3339(r["sample_ts"].as_str().unwrap()).expect("sample_ts");
            assert_eq!(m["ts"], sample_ms);
            assert_eq!(m["approach_k"], r["approach_k"], "{m}");
            assert!(m["approach_k"].is_f64(), "{m} {}", r["reasons"]);
            assert_eq!(m["reactor"], "hts1");
            assert_eq!(m["site"], "baw1");
        }
    }

    #[test]
    fn without_the_metrics_topic_no_metrics_message_is_made() {
        let (mut e, _m) = engine_with(false);
        let out = three_hts1_analyses(&mut e);
        assert_eq!(
            out.iter().filter(|a| a.topic.ends_with("/result")).count(),
            3
        );
        assert!(
            out.iter().all(|a| !a.topic.ends_with("/metrics")),
            "{out:?}"
        );
    }

    #[test]
    fn commands_end_in_a_typed_verdict_with_an_outcome_and_a_counter() {
        let (mut e, m) = engine();
        let topic = "eqwatch/baw1/lts1/command";
        let cases = [
            ("not json", Verdict::Invalid, None),
            (
                r#"{"command":"acknowledge","alarm":"approach-high","user":"visitor"}"#,
                Verdict::NotAllowed,
                Some("visitor"),
            ),
            (
                r#"{"command":"reset-latch","alarm":"no-such-alarm","user":"op-demo","request_id":"r7"}"#,
                Verdict::Refused,
                Some("op-demo"),
            ),
            (
                r#"{"command":"shelve","alarm":"approach-high","user":"op-demo","duration":"1 h","reason":"analyser work"}"#,
                Verdict::Accepted,
                Some("op-demo"),
            ),
        ];
        for (payload, verdict, user) in cases {
            let out = send(&mut e, topic, payload, T0_MS);
            let o = outcome_of(&out);
            assert_eq!(o["outcome"], verdict.as_str(), "{payload}: {o}");
            assert_eq!(o["accepted"], verdict == Verdict::Accepted);
            assert_eq!(o["user"].as_str(), user);
            assert_eq!(o["reactor"], "lts1");
            if verdict == Verdict::Accepted {
                // The outcome first, then the retained states the command changed.
                let at = |suffix: &str| out.iter().position(|a| a.topic.ends_with(suffix));
                assert!(at("/command/outcome") < at("/alarms"), "{out:?}");
            }
        }
        for v in Verdict::ALL {
            assert_eq!(m.commands[v.index()].load(Relaxed), 1, "{}", v.as_str());
        }
        let refused = send(
            &mut e,
            topic,
            r#"{"command":"reset-latch","alarm":"no-such-alarm","user":"op-demo","request_id":"r7"}"#,
            T0_MS,
        );
        assert_eq!(outcome_of(&refused)["request_id"], "r7");
    }

    #[test]
    fn readings_stamped_in_the_year_9999_are_refused_and_counted() {
        // Issue 10 §1, reproduced: before the clock window a 9999 analysis was evaluated
        // and every later one refused as out of order.
        let (mut e, m) = engine();
        let t = T0_MS;
        let future = "9999-12-31T23:59:59Z";
        for (topic, payload) in [
            (
                "baw1/hts1/TI-205",
                format!(r#"{{"ts":"{future}","value":1e6,"unit":"degC"}}"#),
            ),
            (
                "baw1/hts1/PI-202",
                format!(r#"{{"ts":"{future}","value":-1,"unit":"barg"}}"#),
            ),
            (
                "baw1/hts1/AI-201",
                format!(
                    r#"{{"ts":"{future}","values":{{"H2":56.0,"N2":20.0,"CO":3.5,"CO2":16.0,"CH4":0.3,"Ar":0.2}},"unit":"mol%"}}"#
                ),
            ),
        ] {
            assert!(send(&mut e, topic, &payload, t).is_empty(), "{topic}");
        }
        let hts = m.reactors.iter().find(|r| r.id == "hts1").expect("hts1");
        assert_eq!(hts.off_clock.load(Relaxed), 3);
        // The unit did not go off line on the refused pressure, and the next set of
        // readings gives a result as usual.
        for (topic, payload) in [
            (
                "baw1/hts1/TI-205",
                format!(r#"{{"ts":{t},"value":430,"unit":"degC"}}"#),
            ),
            (
                "baw1/hts1/PI-202",
                format!(r#"{{"ts":{t},"value":30,"unit":"barg"}}"#),
            ),
        ] {
            assert!(send(&mut e, topic, &payload, t).is_empty(), "{topic}");
        }
        let analysis = format!(
            r#"{{"ts":{t},"values":{{"H2":56.0,"N2":20.0,"CO":3.5,"CO2":16.0,"CH4":0.3,"Ar":0.2}},"unit":"mol%"}}"#
        );
        let out = send(&mut e, "baw1/hts1/AI-201", &analysis, t + 60_000);
        assert_eq!(
            out.iter().filter(|a| a.topic.ends_with("/result")).count(),
            1,
            "{out:?}"
        );
        assert!(out.iter().all(|a| !a.payload.contains("9999")), "{out:?}");
    }

    /// A payload for the property test below: raw bytes, or text that looks like the
    /// inputs (numbers, JSON with odd fields, values and timestamps).
    fn hostile_payload() -> impl proptest::strategy::Strategy<Value = Vec<u8>> {
        use proptest::prelude::*;
        let number = prop_oneof![
            any::<f64>().prop_map(|x| format!("{x}")),
            Just("1e309".to_string()),
            Just("-0".to_string()),
            Just("null".to_string()),
            "[0-9.eE+-]{0,24}",
        ];
        let ts = prop_oneof![
            any::<i64>().prop_map(|t| t.to_string()),
            Just("\"9999-12-31T23:59:59Z\"".to_string()),
            "\"[0-9T:Z.+-]{0,30}\"",
        ];
        prop_oneof![
            proptest::collection::vec(any::<u8>(), 0..400),
            number.clone().prop_map(String::into_bytes),
            (ts.clone(), number.clone(), "[a-zA-Z%/ ]{0,8}").prop_map(|(t, v, u)| {
                format!(r#"{{"ts":{t},"value":{v},"unit":"{u}","quality":"good"}}"#).into_bytes()
            }),
            (ts, proptest::collection::vec(("[A-Za-z0-9]{0,4}", number), 0..8), "[a-z%]{0,4}")
                .prop_map(|(t, vals, u)| {
                    let body: Vec<String> =
                        vals.iter().map(|(k, v)| format!("\"{k}\":{v}")).collect();
                    format!(r#"{{"ts":{t},"values":{{{}}},"unit":"{u}"}}"#, body.join(","))
                        .into_bytes()
                }),
            "\\{\"command\":\"[a-z-]{0,20}\",\"alarm\":\"[a-z-]{0,16}\",\"user\":\"[a-z0-9]{0,8}\",\"duration\":\"[0-9a-z ]{0,6}\"\\}"
                .prop_map(String::into_bytes),
        ]
    }

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(64))]
        /// Any bytes on any input or command topic, in any order: the pipeline never
        /// panics, and everything it emits is a JSON object.
        #[test]
        fn hostile_messages_on_every_topic_never_panic(
            messages in proptest::collection::vec((0usize..1000, hostile_payload(), 0i64..120), 1..40)
        ) {
            let (mut e, _m) = engine();
            let mut topics = e.subscriptions();
            topics.push("baw1/nowhere".into());
            for (which, payload, minute) in messages {
                let topic = topics[which % topics.len()].clone();
                let at = T0_MS + minute * 60_000;
                let raw = RawInput { topic, payload, arrival_ms: at };
                let mut out = Vec::new();
                e.message(&raw, at, &mut out);
                e.tick(at, &mut out);
                for a in &out {
                    let v: Value = serde_json::from_str(&a.payload).expect("records are JSON");
                    proptest::prop_assert!(v.is_object());
                }
            }
        }
    }
}
