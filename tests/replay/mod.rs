//! `eqwatch replay`: deterministic output, line-numbered refusal of malformed rows, the
//! same results as the daemon gives for the same readings over MQTT, and plots that hold
//! their series.

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Duration;

use serde_json::Value;

use crate::support::*;

/// One LTS (invented test plant).
fn write_config(dir: &Path, port: u16, http_port: u16) -> PathBuf {
    write_lts_plant(
        dir,
        port,
        http_port,
        "replay",
        r#"
[reactors.lts1.drift]
baseline = "learn"
baseline_window = "10 min"
baseline_min_samples = 2
aggregate = "10 min"
min_per_aggregate = 1
min_aggregates = 3
end_of_run_limit = "20 K"
"#,
    )
}

const GAS: [(&str, f64); 5] = [
    // docs/domain.md §8 LTS gas (dry mol%).
    ("H2", 61.0536),
    ("N2", 18.98637),
    ("CO", 0.28697),
    ("CO2", 19.38096),
    ("CH4", 0.2921),
];

/// Analyses every 5 min at slowly rising temperatures (invented): minute m-1 carries
/// T, P and the steam ratio, minute m the analysis.
fn readings() -> Vec<(i64, f64)> {
    (1..=12).map(|k| (5 * k, 218.0 + 0.4 * k as f64)).collect()
}

/// The gas of analysis `k`: CO moves by 0.002 mol% a cycle (a live GC never repeats every
/// digit; identical analyses are flagged as a stuck analyser).
fn gas(m: i64) -> Vec<(&'static str, f64)> {
    let d = 0.0004 * m as f64;
    GAS.iter()
        .map(|&(k, v)| match k {
            "CO" => (k, v + d),
            "CO2" => (k, v - d),
            _ => (k, v),
        })
        .collect()
}

fn csv() -> String {
    let mut s = String::from(
        "# invented test readings\ntime,TI-3,PI-3,FY-3,AI-3.H2,AI-3.N2,AI-3.CO,AI-3.CO2,AI-3.CH4\n",
    );
    for (m, t_c) in readings() {
        s.push_str(&format!("{},{t_c},29.0,0.36312,,,,,\n", ts(m) - 60_000));
        let g: Vec<String> = gas(m).iter().map(|(_, v)| v.to_string()).collect();
        s.push_str(&format!("{},,,,{}\n", ts(m), g.join(",")));
    }
    s
}

fn replay(config: &Path, input: &Path, out: &Path, plot: Option<&Path>) -> (i32, String, String) {
    replay_with(config, input, out, plot, &[])
}

fn replay_with(
    config: &Path,
    input: &Path,
    out: &Path,
    plot: Option<&Path>,
    extra: &[&str],
) -> (i32, String, String) {
    let mut c = Command::new(env!("CARGO_BIN_EXE_eqwatch"));
    c.args(["replay", "--config"])
        .arg(config)
        .arg("--input")
        .arg(input)
        .arg("--out")
        .arg(out);
    if let Some(p) = plot {
        c.arg("--plot").arg(p);
    }
    c.args(extra);
    let o = c.output().expect("run replay");
    (
        o.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&o.stdout).into(),
        String::from_utf8_lossy(&o.stderr).into(),
    )
}

/// Result payloads without the delivery and wall-clock fields.
fn comparable(mut v: Value) -> Value {
    if let Some(m) = v.as_object_mut() {
        for k in ["seq", "late", "evaluated_at"] {
            m.remove(k);
        }
    }
    v
}

#[test]
fn replay_gives_what_the_daemon_publishes_over_mqtt() {
    let rt = runtime();
    let broker = Mosquitto::start();
    let dir = tempfile::tempdir().unwrap();
    let http = free_port();
    let config = write_config(dir.path(), broker.port, http);
    let got = collector(&rt, broker.port, &["eqwatch/test/lts1/result"]);
    let _d = Daemon::start(&config, http);
    let p = Publisher::new(&rt, broker.port);
    std::thread::sleep(Duration::from_millis(700));
    for (m, t_c) in readings() {
        let s =
            |v: f64, u: &str| format!(r#"{{"ts":{},"value":{v},"unit":"{u}"}}"#, ts(m) - 60_000);
        p.publish(&rt, "t/lts1/ti", &s(t_c, "degC"));
        p.publish(&rt, "t/lts1/pi", &s(29.0, "barg"));
        p.publish(&rt, "t/lts1/fy", &s(0.36312, "mol/mol"));
        let values: Vec<String> = gas(m).iter().map(|(k, v)| format!("\"{k}\":{v}")).collect();
        p.publish(
            &rt,
            "t/lts1/ai",
            &format!(
                r#"{{"ts":{},"values":{{{}}},"unit":"mol%"}}"#,
                ts(m),
                values.join(",")
            ),
        );
    }
    let n = readings().len();
    assert!(
        wait_for(&got, Duration::from_secs(20), |m| m.len() >= n),
        "daemon results missing"
    );
    let mqtt: Vec<Value> = got
        .lock()
        .unwrap()
        .iter()
        .map(|(_, p, _)| comparable(serde_json::from_str(p).unwrap()))
        .collect();

    let input = dir.path().join("history.csv");
    std::fs::write(&input, csv()).unwrap();
    let out = dir.path().join("results.jsonl");
    let (code, stdout, stderr) = replay(&config, &input, &out, None);
    assert_eq!(code, 0, "{stdout}{stderr}");
    let replayed: Vec<Value> = std::fs::read_to_string(&out)
        .unwrap()
        .lines()
        .map(|l| serde_json::from_str::<Value>(l).unwrap())
        .filter(|r| r["topic"] == "eqwatch/test/lts1/result")
        .map(|r| comparable(r["payload"].clone()))
        .collect();
    assert_eq!(replayed.len(), n);
    assert_eq!(mqtt.len(), n);
    for (a, b) in mqtt.iter().zip(&replayed) {
        assert_eq!(a, b);
    }
    // The drift figures travel with the result: the baseline is learned by the end.
    assert_eq!(replayed[n - 1]["drift"]["baseline"], "learned");
    assert!(replayed[n - 1]["drift"]["trend_k_per_day"].is_number());
}

/// Results of the test plant's LTS in a replay's output file.
fn lts_results(out: &Path) -> usize {
    std::fs::read_to_string(out)
        .unwrap()
        .lines()
        .filter(|l| l.contains("\"eqwatch/test/lts1/result\""))
        .count()
}

#[test]
fn malformed_rows_are_reported_with_their_line_and_skipped() {
    let dir = tempfile::tempdir().unwrap();
    let config = write_config(dir.path(), 1883, 1);
    let mut text = csv();
    // Line numbers: 1 comment, 2 header, then data rows from line 3.
    let lines_before = text.lines().count();
    text.push_str(&format!("{},abc,29.0,0.36312,,,,,\n", ts(70)));
    text.push_str(&format!("{},220.0,29.0\n", ts(71)));
    text.push_str(&format!("{},220.0,29.0,0.36312,,,,,\n", ts(1)));
    text.push_str(&format!("{},220.0,29.0,0.36312,,,,,\n", ts(72)));
    let input = dir.path().join("bad.csv");
    std::fs::write(&input, &text).unwrap();
    let out = dir.path().join("results.jsonl");
    let (code, stdout, stderr) = replay(&config, &input, &out, None);
    assert_eq!(code, 0, "{stdout}{stderr}");
    let l = lines_before;
    assert!(
        stderr.contains(&format!(
            ":{}: row skipped: column 2: \"abc\" is not a number",
            l + 1
        )),
        "{stderr}"
    );
    assert!(
        stderr.contains(&format!(
            ":{}: row skipped: 3 cells where the header has 9 columns",
            l + 2
        )),
        "{stderr}"
    );
    assert!(
        stderr.contains(&format!(
            ":{}: row skipped: time 2026-12-01T00:01:00.000Z is earlier",
            l + 3
        )),
        "{stderr}"
    );
    assert!(stdout.contains("3 rows skipped"), "{stdout}");
    // The good rows still gave every result.
    assert_eq!(lts_results(&out), readings().len());

    // An unknown column stops the replay before it starts, naming the column.
    std::fs::write(&input, "time,TI-3,TI-9\n").unwrap();
    let (code, _, stderr) = replay(&config, &input, &out, None);
    assert_eq!(code, 1);
    assert!(
        stderr.contains("line 1: column 3 \"TI-9\" is no input"),
        "{stderr}"
    );
}

#[test]
fn a_byte_order_mark_and_a_row_that_is_not_utf8_do_not_stop_a_replay() {
    // Issue 10 §1, reproduced first: a UTF-8 BOM was refused, and one invalid byte
    // stopped the replay with exit 2 and no output.
    let dir = tempfile::tempdir().unwrap();
    let config = write_config(dir.path(), 1883, 1);
    let text = csv();
    let lines_before = text.lines().count();
    let mut bytes = b"\xEF\xBB\xBF".to_vec();
    bytes.extend_from_slice(text.as_bytes());
    // A row with a Latin-1 degree sign (0xB0) where UTF-8 was expected: 13 digits of
    // epoch ms, then ",220", so the bad byte is the 18th.
    bytes.extend_from_slice(format!("{},220", ts(70)).as_bytes());
    bytes.push(0xB0);
    bytes.extend_from_slice(b",29.0,0.36312,,,,,\n");
    let input = dir.path().join("bom.csv");
    std::fs::write(&input, &bytes).unwrap();
    let out = dir.path().join("results.jsonl");
    let (code, stdout, stderr) = replay(&config, &input, &out, None);
    assert_eq!(code, 0, "{stdout}{stderr}");
    assert!(
        stderr.contains(&format!(
            ":{}: row skipped: not UTF-8 text (byte 18 of the line)",
            lines_before + 1
        )),
        "{stderr}"
    );
    assert!(stdout.contains("1 rows skipped"), "{stdout}");
    assert_eq!(lts_results(&out), readings().len());
}

#[test]
fn one_far_future_row_is_left_out_and_the_rows_after_it_replay() {
    // Issue 10 §1, reproduced first: one row stamped 9999 made every later row
    // "earlier than the row before", so they were all skipped.
    let dir = tempfile::tempdir().unwrap();
    let config = write_config(dir.path(), 1883, 1);
    let text = csv();
    let mut lines: Vec<&str> = text.lines().collect();
    // After the header (line 2) and four data rows: a thermocouple row from 9999.
    let odd = "9999-12-31T23:59:59Z,220.0,29.0,0.36312,,,,,";
    lines.insert(6, odd);
    let input = dir.path().join("future.csv");
    std::fs::write(&input, lines.join("\n") + "\n").unwrap();
    let out = dir.path().join("results.jsonl");
    let (code, stdout, stderr) = replay(&config, &input, &out, None);
    assert_eq!(code, 0, "{stdout}{stderr}");
    assert!(
        stderr.contains(
            ":7: row skipped: time 9999-12-31T23:59:59.000Z is ahead of the rows around it"
        ),
        "{stderr}"
    );
    assert!(stdout.contains("1 rows skipped"), "{stdout}");
    assert_eq!(lts_results(&out), readings().len());
}

#[test]
fn a_day_of_demo_history_replays_byte_identically_with_plots() {
    let dir = tempfile::tempdir().unwrap();
    let input = dir.path().join("day.csv");
    let mut f = std::io::BufWriter::new(std::fs::File::create(&input).unwrap());
    let opts = eqwatch::demo::sim::HistoryOptions {
        days: 1,
        ..Default::default()
    };
    eqwatch::demo::sim::write_history(&opts, &mut f).unwrap();
    drop(f);
    let config = Path::new(env!("CARGO_MANIFEST_DIR")).join("config/demo-plant.toml");
    let (a, b) = (dir.path().join("a.jsonl"), dir.path().join("b.jsonl"));
    let plots = dir.path().join("plots");
    let (code, stdout, stderr) = replay(&config, &input, &a, Some(&plots));
    assert_eq!(code, 0, "{stdout}{stderr}");
    // One worker thread instead of one per core: the same bytes.
    let (code, _, _) = replay_with(&config, &input, &b, None, &["--threads", "1"]);
    assert_eq!(code, 0);
    let (x, y) = (std::fs::read(&a).unwrap(), std::fs::read(&b).unwrap());
    assert!(!x.is_empty());
    assert!(x == y, "two replays of the same file differ");
    // 1440 rows, 288 analyses per analyser = 5 × 288 results [invented demo scenario, src/demo/sim.rs].
    let text = String::from_utf8(x).unwrap();
    let results = text.lines().filter(|l| l.contains("/result\"")).count();
    assert_eq!(results, 5 * 288, "{stdout}");
    // Plots: one per reactor and an overview; SVG with the series in them.
    for id in ["ref1", "hts1", "lts1", "mth1", "amc1", "overview"] {
        let svg = std::fs::read_to_string(plots.join(format!("{id}.svg"))).unwrap();
        let doc = roxmltree::Document::parse(&svg).expect("plot parses as XML");
        assert_eq!(doc.root_element().tag_name().name(), "svg");
        if id != "overview" {
            // (No baseline yet: the demo plant learns it over 7 to 14 days.)
            assert!(
                doc.descendants()
                    .any(|n| n.attribute("id") == Some("baseline"))
            );
            // The methanator has no approach (its equilibrium CO is below the analyser's
            // detection limit): its chart shows the measured slip.
            let groups: &[&str] = if id == "mth1" {
                &["key-measured", "key-equilibrium"]
            } else {
                &["approach", "uncertainty", "key-measured", "key-equilibrium"]
            };
            for group in groups {
                let g = doc
                    .descendants()
                    .find(|n| n.attribute("id") == Some(*group))
                    .unwrap_or_else(|| panic!("{id}.svg has no {group} group"));
                assert!(
                    g.descendants().any(|n| n.tag_name().name() == "path"),
                    "{id}.svg {group} has no path"
                );
            }
            assert!(svg.contains("approach to equilibrium (K)"));
        }
    }
}

#[test]
fn a_daemon_restart_keeps_the_learned_baseline() {
    let rt = runtime();
    let broker = Mosquitto::start();
    let dir = tempfile::tempdir().unwrap();
    let http = free_port();
    let config = write_config(dir.path(), broker.port, http);
    let got = collector(&rt, broker.port, &["eqwatch/test/lts1/result"]);
    let publish = |p: &Publisher, m: i64, t_c: f64| {
        let s =
            |v: f64, u: &str| format!(r#"{{"ts":{},"value":{v},"unit":"{u}"}}"#, ts(m) - 60_000);
        p.publish(&rt, "t/lts1/ti", &s(t_c, "degC"));
        p.publish(&rt, "t/lts1/pi", &s(29.0, "barg"));
        p.publish(&rt, "t/lts1/fy", &s(0.36312, "mol/mol"));
        let values: Vec<String> = gas(m).iter().map(|(k, v)| format!("\"{k}\":{v}")).collect();
        p.publish(
            &rt,
            "t/lts1/ai",
            &format!(
                r#"{{"ts":{},"values":{{{}}},"unit":"mol%"}}"#,
                ts(m),
                values.join(",")
            ),
        );
    };
    let mut d = Daemon::start(&config, http);
    let p = Publisher::new(&rt, broker.port);
    std::thread::sleep(Duration::from_millis(700));
    for (m, t_c) in readings().into_iter().take(6) {
        publish(&p, m, t_c);
    }
    assert!(wait_for(&got, Duration::from_secs(15), |m| m.len() >= 6));
    let last: Value = serde_json::from_str(&got.lock().unwrap()[5].1).unwrap();
    assert_eq!(last["drift"]["baseline"], "learned", "{last}");
    let baseline = last["drift"]["baseline_k"].as_f64().unwrap();
    d.signal("-TERM");
    assert_eq!(d.wait_exit(Duration::from_secs(15)), Some(0));
    let state = std::fs::read_to_string(dir.path().join("journal/watch-state.json")).unwrap();
    assert!(
        state.contains("eqwatch.state/1") && state.contains("\"lts1\""),
        "{state}"
    );

    // Restarted: the next analysis is judged against the same baseline, not a new run.
    let _d2 = Daemon::start(&config, http);
    std::thread::sleep(Duration::from_millis(700));
    let (m, t_c) = readings()[6];
    publish(&p, m, t_c);
    assert!(wait_for(&got, Duration::from_secs(15), |m| m.len() >= 7));
    let next: Value = serde_json::from_str(&got.lock().unwrap()[6].1).unwrap();
    assert_eq!(next["drift"]["baseline"], "learned", "{next}");
    assert_eq!(next["drift"]["baseline_k"].as_f64().unwrap(), baseline);
}

/// Replays days `first_day..first_day + days` of the invented demo year (src/demo/sim.rs,
/// `YEAR_SCENARIO`) through the demo configuration; returns every alert and alarm event
/// as (time, reactor, alarm, event, value, limit).
fn scenario_events(first_day: u32, days: u32) -> Vec<(String, String, String, String, f64, f64)> {
    let dir = tempfile::tempdir().unwrap();
    let input = dir.path().join("weeks.csv");
    let mut f = std::io::BufWriter::new(std::fs::File::create(&input).unwrap());
    let opts = eqwatch::demo::sim::HistoryOptions {
        first_day,
        days,
        ..Default::default()
    };
    eqwatch::demo::sim::write_history(&opts, &mut f).unwrap();
    drop(f);
    let config = Path::new(env!("CARGO_MANIFEST_DIR")).join("config/demo-plant.toml");
    let out = dir.path().join("out.jsonl");
    let (code, stdout, stderr) = replay(&config, &input, &out, None);
    assert_eq!(code, 0, "{stdout}{stderr}");
    let text = std::fs::read_to_string(&out).unwrap();
    let mut events = Vec::new();
    for line in text.lines() {
        let v: Value = serde_json::from_str(line).unwrap();
        let p = &v["payload"];
        if p["schema"] != "eqwatch.event/1" {
            continue;
        }
        let s = |k: &str| p[k].as_str().unwrap_or_default().to_string();
        events.push((
            s("at"),
            s("reactor"),
            s("alarm"),
            s("event"),
            p["value"].as_f64().unwrap_or(f64::NAN),
            p["limit"].as_f64().unwrap_or(f64::NAN),
        ));
    }
    events
}

/// (reactor, alarm, event) of each event, without the routine ones named.
fn names(ev: &[(String, String, String, String, f64, f64)]) -> Vec<(&str, &str, &str)> {
    ev.iter()
        .map(|e| (e.1.as_str(), e.2.as_str(), e.3.as_str()))
        .collect()
}

#[test]
fn weeks_of_history_raise_what_an_engineer_should_see_and_nothing_else() {
    // Days 113-157 of the invented year: the reformer's sulphur poisoning (day 120 08:00,
    // 8 -> 25 K over 6 h, recovering over two weeks), the methanator's CO breakthrough
    // (day 150 10:00-16:00), weekly LTS analyser calibrations (bad quality), LTS ageing.
    let ev = scenario_events(113, 45);
    // Every raised value is past its limit.
    for e in ev.iter().filter(|e| e.3 == "raised") {
        assert!(e.4 > e.5, "{e:?}");
    }
    let mut seen = names(&ev);
    // Weekly calibrations: the LTS operator alarm is suppressed by design and back, once
    // each week (7 in the window), and nothing else for them.
    let calib = seen
        .iter()
        .filter(|n| n.0 == "lts1" && (n.2 == "suppressed" || n.2 == "unsuppressed"))
        .count();
    assert_eq!(calib, 14, "{seen:?}");
    seen.retain(|n| n.0 != "lts1" || !(n.2 == "suppressed" || n.2 == "unsuppressed"));
    assert_eq!(
        seen,
        [
            // One bad amc1 analysis: its operator alarm suppressed and back.
            ("amc1", "beyond-equilibrium", "suppressed"),
            ("amc1", "beyond-equilibrium", "unsuppressed"),
            // The poisoning is a step (one level-shift alert), not a trend: no trend or
            // end-of-run alert; the operator alarm at 20 K, stale after 24 h, cleared.
            ("ref1", "cusum", "raised"),
            ("ref1", "approach-high", "raised"),
            ("ref1", "stale:approach-high", "raised"),
            ("ref1", "approach-high", "cleared"),
            ("ref1", "stale:approach-high", "cleared"),
            // One bad ref1 analysis later on.
            ("ref1", "approach-high", "suppressed"),
            ("ref1", "approach-high", "unsuppressed"),
            // The breakthrough: the CO slip alarm (5 ppm) and the bed-rise alert.
            ("mth1", "co-slip-high", "raised"),
            ("mth1", "bed-rise", "raised"),
            ("mth1", "co-slip-high", "cleared"),
            ("mth1", "bed-rise", "cleared"),
        ],
        "{ev:#?}"
    );
    let at = |alarm: &str| {
        ev.iter()
            .find(|e| e.2 == alarm && e.3 == "raised")
            .unwrap()
            .0
            .clone()
    };
    assert!(at("cusum").starts_with("2026-05-01T0") || at("cusum").starts_with("2026-05-01T1"));
    assert!(
        at("co-slip-high").starts_with("2026-05-31T10"),
        "{}",
        at("co-slip-high")
    );

    // A trip (day 300 06:00, 3 days down): one off-line change per unit each way and no
    // per-alarm suppression events. The analysers come back about 4.7 h after the pressure
    // (the scenario's restart), past the 4 h data-quality limit of on-line time: one
    // data-quality alert per unit, cleared by the first analysis.
    let ev = scenario_events(296, 10);
    let seen = names(&ev);
    let count =
        |alarm: &str, event: &str| seen.iter().filter(|n| n.1 == alarm && n.2 == event).count();
    assert_eq!(count("off-line", "raised"), 5, "{seen:?}");
    assert_eq!(count("off-line", "cleared"), 5, "{seen:?}");
    assert_eq!(count("data-quality", "raised"), 5, "{seen:?}");
    assert_eq!(count("data-quality", "cleared"), 5, "{seen:?}");
    // ... and the two weekly LTS calibrations of the window.
    assert_eq!(count("approach-high", "suppressed"), 2, "{seen:?}");
    assert_eq!(count("approach-high", "unsuppressed"), 2, "{seen:?}");
    assert_eq!(seen.len(), 24, "{seen:?}");

    // The reformer analyser out all day 200: one data-quality alert, and the window's
    // weekly LTS calibration, nothing else.
    let ev = scenario_events(193, 10);
    assert_eq!(
        names(&ev),
        [
            ("lts1", "approach-high", "suppressed"),
            ("lts1", "approach-high", "unsuppressed"),
            ("ref1", "data-quality", "raised"),
            ("ref1", "data-quality", "cleared")
        ],
        "{ev:?}"
    );
}

#[test]
fn a_drifting_inlet_analyser_is_caught_by_the_balances_and_released_by_its_recalibration() {
    // Days 236-275 of the invented year: the lts1 inlet analyser AI-300's CO reads high
    // from day 240, the error growing to +10 % of reading by day 270, when it is
    // recalibrated (src/demo/sim.rs YEAR_SCENARIO); TI-305B fails on days 249-252.
    let ev = scenario_events(236, 40);
    let lts: Vec<_> = ev
        .iter()
        .filter(|e| e.1 == "lts1" && e.3 != "suppressed" && e.3 != "unsuppressed")
        .map(|e| (e.0.as_str(), e.2.as_str(), e.3.as_str()))
        .collect();
    let gross: Vec<_> = lts.iter().filter(|e| e.1 == "gross-error").collect();
    assert_eq!(gross.len(), 2, "{lts:?}");
    let (raised, cleared) = (gross[0], gross[1]);
    assert_eq!(raised.2, "raised");
    assert_eq!(cleared.2, "cleared");
    // Raised a few days into the drift (the error past the noise of the balances), never
    // before it; cleared within a day of the recalibration (day 270 = 2026-09-28).
    assert!(
        raised.0 > "2026-09-01" && raised.0 < "2026-09-14",
        "{raised:?}"
    );
    assert!(cleared.0.starts_with("2026-09-28"), "{cleared:?}");
    // Nothing else but the thermocouple failure's data-quality alert, raised and cleared.
    let others: Vec<_> = lts.iter().filter(|e| e.1 != "gross-error").collect();
    assert_eq!(
        others.iter().map(|e| (e.1, e.2)).collect::<Vec<_>>(),
        [("data-quality", "raised"), ("data-quality", "cleared")],
        "{lts:?}"
    );
    // The other reactors raise nothing in the window.
    assert!(
        ev.iter()
            .all(|e| e.1 == "lts1" || e.3 == "suppressed" || e.3 == "unsuppressed"),
        "{ev:?}"
    );
}

proptest::proptest! {
    #![proptest_config(proptest::prelude::ProptestConfig::with_cases(24))]
    /// Any bytes spliced into a good history file (as rows, or over its bytes): replay
    /// reports the lines it skips and finishes with exit 0 or 1, never a crash or an
    /// internal error (exit 2).
    #[test]
    fn hostile_rows_never_crash_replay(
        rows in proptest::collection::vec(proptest::collection::vec(proptest::prelude::any::<u8>(), 0..120), 0..6),
        edits in proptest::collection::vec((0usize..100_000, proptest::prelude::any::<u8>()), 0..8),
    ) {
        let dir = tempfile::tempdir().unwrap();
        let config = write_config(dir.path(), 1883, 9873);
        let mut bytes = csv().into_bytes();
        for r in rows {
            bytes.extend_from_slice(&r);
            bytes.push(b'\n');
        }
        let n = bytes.len();
        for (at, b) in edits {
            bytes[at % n] = b;
        }
        let input = dir.path().join("in.csv");
        std::fs::write(&input, &bytes).unwrap();
        let (code, _, err) = replay(&config, &input, &dir.path().join("out.jsonl"), None);
        proptest::prop_assert!(code == 0 || code == 1, "exit {code}: {err}");
    }
}

/// The cells of one CSV line (RFC 4180 quoting; the line without its CRLF).
fn csv_cells(line: &str) -> Vec<String> {
    let (mut cells, mut cur, mut quoted, mut chars) =
        (Vec::new(), String::new(), false, line.chars().peekable());
    while let Some(c) = chars.next() {
        match (c, quoted) {
            ('"', true) if chars.peek() == Some(&'"') => {
                cur.push('"');
                chars.next();
            }
            ('"', _) => quoted = !quoted,
            (',', false) => cells.push(std::mem::take(&mut cur)),
            (c, _) => cur.push(c),
        }
    }
    cells.push(cur);
    cells
}

#[test]
fn two_days_of_demo_history_as_csv_per_reactor_say_what_the_json_lines_say() {
    let dir = tempfile::tempdir().unwrap();
    let input = dir.path().join("days.csv");
    let mut f = std::io::BufWriter::new(std::fs::File::create(&input).unwrap());
    let opts = eqwatch::demo::sim::HistoryOptions {
        days: 2,
        ..Default::default()
    };
    eqwatch::demo::sim::write_history(&opts, &mut f).unwrap();
    drop(f);
    // The demo plant with the metrics message switched on (its commented default off).
    let demo = std::fs::read_to_string(
        Path::new(env!("CARGO_MANIFEST_DIR")).join("config/demo-plant.toml"),
    )
    .unwrap();
    assert!(demo.contains("# metrics_topic = false\n"));
    let config = dir.path().join("plant.toml");
    std::fs::write(
        &config,
        demo.replace("# metrics_topic = false\n", "metrics_topic = true\n"),
    )
    .unwrap();
    let lines = dir.path().join("all.jsonl");
    let (code, stdout, stderr) = replay(&config, &input, &lines, None);
    assert_eq!(code, 0, "{stdout}{stderr}");
    let tables = dir.path().join("csv");
    let (code, stdout, stderr) = replay_with(&config, &input, &tables, None, &["--format", "csv"]);
    assert_eq!(code, 0, "{stdout}{stderr}");
    assert!(stdout.contains("5 CSV files in"), "{stdout}");

    let records: Vec<Value> = std::fs::read_to_string(&lines)
        .unwrap()
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect();
    // Derived from the JSON lines above: each result is followed by its metrics message.
    for (i, r) in records.iter().enumerate() {
        let topic = r["topic"].as_str().unwrap();
        if let Some(id) = topic
            .strip_prefix("eqwatch/baw1/")
            .and_then(|t| t.strip_suffix("/result"))
        {
            let m = &records[i + 1];
            assert_eq!(m["topic"], format!("eqwatch/baw1/{id}/metrics"));
            assert_eq!(m["retain"], false);
            let (p, mp) = (&r["payload"], &m["payload"]);
            let sample_ms = eqwatch::timefmt::parse_rfc3339(p["sample_ts"].as_str().unwrap());
            assert_eq!(mp["ts"].as_i64(), sample_ms);
            assert_eq!(
                mp.get("approach_k"),
                p.get("approach_k").filter(|v| !v.is_null())
            );
        }
    }

    let mut rows_total = 0;
    for id in ["ref1", "hts1", "lts1", "mth1", "amc1"] {
        let text = std::fs::read_to_string(tables.join(format!("{id}.csv"))).unwrap();
        assert!(text.ends_with("\r\n"), "{id}.csv: lines end in CRLF");
        let mut it = text.split_terminator("\r\n");
        let header = csv_cells(it.next().expect("a header"));
        assert_eq!(
            header[..7],
            [
                "sample_ts",
                "quality",
                "approach_k",
                "approach_uncertainty_k",
                "equilibrium_temperature_k",
                "q_over_k",
                "ln_q"
            ],
            "{id}"
        );
        assert_eq!(header.last().map(String::as_str), Some("reasons"));
        let col = |name: &str| header.iter().position(|h| h == name).unwrap();
        let results: Vec<&Value> = records
            .iter()
            .filter(|r| r["topic"] == format!("eqwatch/baw1/{id}/result"))
            .map(|r| &r["payload"])
            .collect();
        let rows: Vec<Vec<String>> = it.map(csv_cells).collect();
        assert_eq!(rows.len(), results.len(), "{id}: a row per result");
        assert!(!rows.is_empty(), "{id}");
        let mut last_ms = i64::MIN;
        for (row, p) in rows.iter().zip(&results) {
            assert_eq!(row.len(), header.len(), "{id}: {row:?}");
            let ms = eqwatch::timefmt::parse_rfc3339(&row[0]).expect("RFC 3339 time");
            assert!(ms > last_ms, "{id}: times increase");
            last_ms = ms;
            assert_eq!(row[0], p["sample_ts"].as_str().unwrap());
            assert_eq!(row[col("quality")], p["quality"].as_str().unwrap());
            // Figures: the JSON value at the CSV column's precision (half its last digit).
            for (name, pointer, half) in [
                ("approach_k", "/approach_k", 5e-4),
                ("temperature_k", "/temperature_k", 5e-3),
                ("pressure_bar_abs", "/pressure_bar", 5e-5),
                (
                    "key_measured_mole_fraction",
                    "/key_measured_mole_fraction",
                    0.0,
                ),
                ("ewma_k", "/drift/ewma_k", 5e-4),
            ] {
                let cell = &row[col(name)];
                match p.pointer(pointer).and_then(Value::as_f64) {
                    None => assert_eq!(cell, "", "{id} {name}: empty for a missing value"),
                    Some(x) => {
                        let y: f64 = cell.parse().unwrap_or_else(|_| panic!("{name}: {cell}"));
                        // Six significant digits where `half` is 0.
                        let tol = if half > 0.0 { half } else { x.abs() * 5e-6 };
                        assert!((x - y).abs() <= tol * 1.0001, "{id} {name}: {x} vs {cell}");
                    }
                }
            }
            let codes: Vec<&str> = p["reasons"]
                .as_array()
                .unwrap()
                .iter()
                .map(|r| r["code"].as_str().unwrap())
                .collect();
            assert_eq!(row[col("reasons")], codes.join(";"));
        }
        rows_total += rows.len();
    }
    // 2 days, 288 analyses a day per analyser, 5 analysers [invented demo scenario,
    // src/demo/sim.rs; as in the one-day test above].
    assert_eq!(rows_total, 5 * 2 * 288);
}

#[test]
fn an_unknown_format_or_csv_without_a_folder_is_refused_naming_the_option() {
    let dir = tempfile::tempdir().unwrap();
    let input = dir.path().join("in.csv");
    std::fs::write(&input, csv()).unwrap();
    let config = Path::new(env!("CARGO_MANIFEST_DIR")).join("config/demo-plant.toml");
    let out = dir.path().join("out");
    let (code, _, stderr) = replay_with(&config, &input, &out, None, &["--format", "xlsx"]);
    assert_eq!(code, 1, "{stderr}");
    assert!(
        stderr.contains("--format") && stderr.contains("jsonl"),
        "{stderr}"
    );
    let o = Command::new(env!("CARGO_BIN_EXE_eqwatch"))
        .args(["replay", "--format", "csv", "--config"])
        .arg(&config)
        .arg("--input")
        .arg(&input)
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(1), "{stderr}");
    assert!(stderr.contains("--out <folder>"), "{stderr}");
}
