//! `eqwatch demo --broker` against a separate mosquitto: every demo reactor leaves a
//! retained result with a numeric approach, the status ends `offline`, the console shows
//! the operator alarm (with its rationale) and engineering alerts the invented scenario
//! raises, the log goes to the demo folder's file and not to the terminal, the plots
//! written at exit into a kept folder parse as SVG, and a temporary folder is removed.

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Duration;

use serde_json::Value;

use crate::support::*;

/// Plant minutes of the first console event line `+NN min <what>` (e.g.
/// `+41 min ref1 ALARM approach-high raised (24.8 K > 20 K)`).
fn raised_at(stdout: &str, what: &str) -> Option<u32> {
    stdout.lines().find_map(|l| {
        let rest = l.trim_start().strip_prefix("! +")?;
        let (min, tail) = rest.split_once(" min ")?;
        tail.starts_with(what).then(|| min.parse().ok())?
    })
}

/// The plots folder the demo names in its summary: `plots: <dir>/ (ref1.svg ...)`.
fn plots_dir(stdout: &str) -> Option<PathBuf> {
    stdout.lines().find_map(|l| {
        let rest = l.strip_prefix("plots: ")?;
        let (dir, _) = rest.split_once("/ (")?;
        Some(PathBuf::from(dir))
    })
}

/// The folder the demo names at the start: `demo folder <dir> (journal in ...`.
fn demo_folder(stdout: &str) -> Option<PathBuf> {
    stdout.lines().find_map(|l| {
        let rest = l.strip_prefix("demo folder ")?;
        let (dir, _) = rest.split_once(" (journal in ")?;
        Some(PathBuf::from(dir))
    })
}

/// Reads and parses one plot; returns its text and how many `approach` groups it has
/// (`<g id="approach">` on a reactor chart, `<g class="approach">` per overview row).
fn parse_svg(path: &Path) -> (String, usize) {
    let text = std::fs::read_to_string(path)
        .unwrap_or_else(|e| panic!("{} not readable: {e}", path.display()));
    let doc = roxmltree::Document::parse(&text)
        .unwrap_or_else(|e| panic!("{} is not XML: {e}", path.display()));
    assert_eq!(doc.root_element().tag_name().name(), "svg");
    let groups = doc
        .descendants()
        .filter(|n| {
            n.has_tag_name("g")
                && (n.attribute("id") == Some("approach")
                    || n.attribute("class")
                        .is_some_and(|c| c.split(' ').any(|x| x == "approach")))
        })
        .count();
    drop(doc);
    (text, groups)
}

#[test]
fn demo_against_mosquitto_raises_an_alarm_and_alerts_and_writes_plots() {
    let broker = Mosquitto::start();
    let tmp = tempfile::tempdir().expect("temp dir");
    let work = tmp.path().join("demo-run");
    // 35 s at 120 simulated s per s: 70 minutes of plant time. The invented demo
    // scenario (src/demo/sim.rs): the reformer's sulphur step at 30 min takes ref1 from 8 K to
    // 25 K over 5 min; TI-305B on lts1 stops reporting at 15 min; analyses every 5 min.
    let out = Command::new(env!("CARGO_BIN_EXE_eqwatch"))
        .args([
            "demo",
            "--speed",
            "120",
            "--duration",
            "35 s",
            "--broker",
            &broker.url(),
            "--workdir",
        ])
        .arg(&work)
        .output()
        .expect("run the demo");
    let stdout = String::from_utf8_lossy(&out.stdout);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(0), "{stdout}\n{stderr}");
    // Nothing is logged where the table is drawn: the log is the folder's file.
    assert!(stderr.trim().is_empty(), "stderr: {stderr}");
    let work = std::fs::canonicalize(&work).expect("the work folder stays");
    assert_eq!(
        demo_folder(&stdout).as_deref(),
        Some(work.as_path()),
        "{stdout}"
    );
    let log_path = work.join("eqwatch.log");
    assert!(
        stdout.contains(&format!("log: {}", log_path.display())),
        "{stdout}"
    );
    let log = std::fs::read_to_string(&log_path).expect("the log file");
    // The advisory notice (src/daemon/mod.rs ADVISORY) opens the daemon's log.
    assert!(
        log.contains("eqwatch is an advisory monitoring tool: it is not a safety function"),
        "{log}"
    );
    // For people: no colour codes, no Rust debug output; the broker named, and the
    // simulated drop-out said as a lost connection.
    assert!(!log.contains('\u{1b}'), "ANSI escape in the log");
    assert!(!log.contains("Some("), "{log}");
    assert!(!log.contains("Raised") && !log.contains("Cleared"), "{log}");
    assert!(log.contains("connected to broker 127.0.0.1:"), "{log}");
    assert!(log.contains("connection to broker 127.0.0.1:"), "{log}");
    assert!(log.contains(" lost after "), "{log}");
    assert!(stdout.contains("summary"), "{stdout}");
    assert!(
        stdout.contains("statistics windows compressed for the demo"),
        "{stdout}"
    );
    assert!(stdout.contains("not a safety function"), "{stdout}");
    assert!(
        stdout.contains("eqwatch is an advisory monitoring tool"),
        "the full advisory notice on screen\n{stdout}"
    );

    // ref1's operator alarm (config/demo-plant.toml: above 20 K for 2 analyses): the
    // analyses sampled at 35 and 40 min are past 20 K, the second reported at 41 min.
    let alarm = raised_at(&stdout, "ref1 ALARM approach-high raised");
    assert!(
        alarm.is_some_and(|m| (35..=46).contains(&m)),
        "alarm at {alarm:?}\n{stdout}"
    );
    // Its rationale (config/demo-plant.toml) is on the line after it.
    let after = stdout
        .lines()
        .skip_while(|l| !l.contains("ref1 ALARM approach-high raised"))
        .nth(1)
        .unwrap_or("");
    assert!(
        after
            .trim_start()
            .starts_with("rationale: Methane slip far above design"),
        "{after}\n{stdout}"
    );
    // Engineering alerts: no good lts1 result since TI-305B went silent (uncertain from
    // 20 min on; 20 min compressed data-quality window), and ref1's poisoning found as a
    // step (the level-shift alert), never fitted as a trend: no end-of-run forecast from it.
    let dq = raised_at(&stdout, "lts1 alert data-quality raised");
    assert!(
        dq.is_some_and(|m| (33..=42).contains(&m)),
        "data-quality at {dq:?}\n{stdout}"
    );
    let step = raised_at(&stdout, "ref1 alert cusum raised");
    assert!(
        step.is_some_and(|m| (30..=40).contains(&m)),
        "level shift at {step:?}\n{stdout}"
    );
    assert!(
        raised_at(&stdout, "ref1 alert end-of-run raised").is_none()
            && raised_at(&stdout, "ref1 alert trend raised").is_none(),
        "a step fitted as a trend\n{stdout}"
    );
    // The methanator's CO breakthrough (sim.rs: from 40 min): its 5 ppm alarm and the
    // bed-rise alert, both after the ramp (two analyses past the limit).
    for what in [
        "mth1 ALARM co-slip-high raised",
        "mth1 alert bed-rise raised",
    ] {
        let at = raised_at(&stdout, what);
        assert!(
            at.is_some_and(|m| (41..=56).contains(&m)),
            "{what} at {at:?}\n{stdout}"
        );
    }
    // The live table: trend and end-of-run columns, the alarm annunciating, and what the
    // sign of the approach means.
    assert!(stdout.contains("trend K/d"), "{stdout}");
    assert!(
        stdout.contains("approach K > 0: short of equilibrium"),
        "{stdout}"
    );
    assert!(stdout.contains("end of run"), "{stdout}");
    assert!(stdout.contains("ALARM approach-high (unack)"), "{stdout}");
    // The summary lists what was raised per reactor.
    let summary = &stdout[stdout
        .find("alerts and alarms raised")
        .expect("raised list")..];
    let ref1 = summary
        .lines()
        .find(|l| l.trim_start().starts_with("ref1"))
        .expect("ref1 in the raised list");
    assert!(ref1.contains("ALARM approach-high +"), "{ref1}");
    assert!(ref1.contains("alert cusum +"), "{ref1}");

    // Plots written at exit.
    let units = ["ref1", "hts1", "lts1", "mth1", "amc1"];
    let dir = plots_dir(&stdout).unwrap_or_else(|| panic!("no plots line\n{stdout}"));
    assert_eq!(dir, work.join("plots"), "plots in the given folder");
    assert!(stdout.contains("demo folder kept: "), "{stdout}");
    for unit in units.iter().chain(&["overview"]) {
        assert!(dir.join(format!("{unit}.svg")).is_file(), "{unit}.svg");
    }
    let (ref1_svg, groups) = parse_svg(&dir.join("ref1.svg"));
    assert_eq!(groups, 1, "ref1.svg: the approach group");
    let (_, groups) = parse_svg(&dir.join("overview.svg"));
    assert_eq!(
        groups,
        units.len(),
        "overview.svg: one approach group per reactor"
    );
    // The alarm is a marker on ref1's chart.
    let doc = roxmltree::Document::parse(&ref1_svg).expect("ref1.svg");
    assert!(
        doc.descendants().any(|n| n.is_element()
            && n.attribute("class").is_some_and(
                |c| c.split(' ').any(|x| x == "marker") && c.split(' ').any(|x| x == "alarm")
            )),
        "no alarm marker in ref1.svg"
    );

    // A new subscriber sees what the demo left behind.
    let rt = runtime();
    let got = collector(
        &rt,
        broker.port,
        &["eqwatch/baw1/+/result", "eqwatch/baw1/status"],
    );
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
        // The methanator has no meaningful approach (equilibrium CO below the analyser's
        // detection limit): its headline is the measured CO slip in ppm.
        let slip = u == "mth1"
            && v["headline"]["figure"] == "key-measured"
            && v["headline"]["unit"] == "ppm"
            && v["headline"]["value"]
                .as_f64()
                .is_some_and(|x| x > 0.5 && x < 12.0);
        assert!(
            numeric != (u == "mth1") && (u != "mth1" || slip),
            "{u}: {v}"
        );
    }
    let (_, status, _) = msgs
        .iter()
        .rev()
        .find(|(t, _, _)| t.ends_with("/status"))
        .unwrap();
    assert!(status.contains("\"offline\""), "{status}");
}

#[test]
fn demo_removes_its_temporary_folder_unless_kept() {
    let broker = Mosquitto::start();
    let out = Command::new(env!("CARGO_BIN_EXE_eqwatch"))
        .args([
            "demo",
            "--speed",
            "120",
            "--duration",
            "4 s",
            "--broker",
            &broker.url(),
        ])
        .output()
        .expect("run the demo");
    let stdout = String::from_utf8_lossy(&out.stdout);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(0), "{stdout}\n{stderr}");
    assert!(stderr.trim().is_empty(), "stderr: {stderr}");
    let dir = demo_folder(&stdout).unwrap_or_else(|| panic!("no demo folder line\n{stdout}"));
    assert!(!dir.exists(), "{} left behind\n{stdout}", dir.display());
    assert!(stdout.contains("removed"), "{stdout}");
    assert!(
        plots_dir(&stdout).is_none(),
        "no plots into a removed folder\n{stdout}"
    );
    assert!(stdout.contains("summary"), "{stdout}");

    // A given folder that is not empty is refused (exit 1), and left as it was.
    let busy = tempfile::tempdir().expect("temp dir");
    std::fs::write(busy.path().join("notes.txt"), "mine").expect("write");
    let out = Command::new(env!("CARGO_BIN_EXE_eqwatch"))
        .args(["demo", "--broker", &broker.url(), "--workdir"])
        .arg(busy.path())
        .output()
        .expect("run the demo");
    assert_eq!(out.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&out.stderr).contains("not empty"));
    let left: Vec<_> = std::fs::read_dir(busy.path())
        .expect("read")
        .filter_map(Result::ok)
        .map(|e| e.file_name())
        .collect();
    assert_eq!(left, vec![std::ffi::OsString::from("notes.txt")]);
}
