//! `eqwatch report`: 20 days of the invented demo history through `eqwatch replay`, then
//! the report of the results: a section per reactor, the lts1 gross-error alert in its
//! events table, well-formed inline SVG, malformed lines counted, bad arguments refused.

use std::path::Path;
use std::process::Command;

fn run(args: &[&std::ffi::OsStr]) -> (i32, String, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_eqwatch"))
        .args(args)
        .output()
        .unwrap();
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

#[test]
fn a_report_of_twenty_days_of_demo_history() {
    let dir = tempfile::tempdir().unwrap();
    let input = dir.path().join("days.csv");
    let mut f = std::io::BufWriter::new(std::fs::File::create(&input).unwrap());
    // Days 236-255 of the invented year: the lts1 inlet analyser AI-300's CO drifts from
    // day 240 (src/demo/sim.rs YEAR_SCENARIO), caught by the balances a few days in.
    let opts = eqwatch::demo::sim::HistoryOptions {
        first_day: 236,
        days: 20,
        ..Default::default()
    };
    eqwatch::demo::sim::write_history(&opts, &mut f).unwrap();
    drop(f);
    let config = Path::new(env!("CARGO_MANIFEST_DIR")).join("config/demo-plant.toml");
    let results = dir.path().join("results.jsonl");
    let (code, stdout, stderr) = run(&[
        "replay".as_ref(),
        "--config".as_ref(),
        config.as_os_str(),
        "--input".as_ref(),
        input.as_os_str(),
        "--out".as_ref(),
        results.as_os_str(),
    ]);
    assert_eq!(code, 0, "{stdout}{stderr}");
    // A torn last line, as a journal can have after a crash: counted, not fatal.
    {
        use std::io::Write;
        let mut f = std::fs::OpenOptions::new()
            .append(true)
            .open(&results)
            .unwrap();
        f.write_all(b"{\"topic\":\"eqwatch/baw1/lts1/result\",\"retain\":tr")
            .unwrap();
    }
    let html_path = dir.path().join("report/baw1.html");
    let (code, stdout, stderr) = run(&[
        "report".as_ref(),
        "--config".as_ref(),
        config.as_os_str(),
        "--input".as_ref(),
        results.as_os_str(),
        "--out".as_ref(),
        html_path.as_os_str(),
    ]);
    assert_eq!(code, 0, "{stdout}{stderr}");
    assert!(stdout.contains("1 malformed lines skipped"), "{stdout}");
    assert!(stderr.contains("results.jsonl:"), "{stderr}");
    let html = std::fs::read_to_string(&html_path).unwrap();
    // Every reactor of the demo plant (config/demo-plant.toml) has its section.
    for id in ["ref1", "hts1", "lts1", "mth1", "amc1"] {
        assert!(
            html.contains(&format!("<section class=\"reactor\" id=\"reactor-{id}\">")),
            "{id}"
        );
    }
    assert!(html.contains("Advisory only"));
    assert!(html.contains("1 malformed line</td>"));
    // The gross-error alert raised in lts1's events table (tests/replay/mod.rs: raised
    // between 2026-09-01 and 2026-09-14), not in another reactor's.
    let lts1 = section(&html, "lts1");
    assert!(
        lts1.contains("<td>gross-error</td><td>raised</td>"),
        "no gross-error alert in lts1's events"
    );
    for id in ["ref1", "hts1", "mth1", "amc1"] {
        assert!(!section(&html, id).contains("gross-error"), "{id}");
    }
    // The methanator's approach is not meaningful: no approach chart for it.
    assert!(!html.contains("id=\"mth1-approach-title\""));
    assert!(section(&html, "mth1").contains("No approach is charted for mth1"));
    // Inline SVG only, each one closed; no scripts or external files.
    let opened = html.matches("<svg").count();
    assert!(opened >= 6, "{opened}");
    assert_eq!(opened, html.matches("</svg>").count());
    assert!(!html.contains("<script"));
    assert!(!html.contains("src=\""));
    assert!(!html.contains("href=\""));

    // One reactor and a period: only its section, only that time.
    let one = dir.path().join("lts1.html");
    let (code, stdout, stderr) = run(&[
        "report".as_ref(),
        "--config".as_ref(),
        config.as_os_str(),
        "--input".as_ref(),
        results.as_os_str(),
        "--out".as_ref(),
        one.as_os_str(),
        "--reactor".as_ref(),
        "lts1".as_ref(),
        "--from".as_ref(),
        "2026-09-01T00:00:00Z".as_ref(),
        "--to".as_ref(),
        "2026-09-08T00:00:00Z".as_ref(),
    ]);
    assert_eq!(code, 0, "{stdout}{stderr}");
    let html = std::fs::read_to_string(&one).unwrap();
    assert!(html.contains("id=\"reactor-lts1\""));
    assert!(!html.contains("id=\"reactor-ref1\""));
    assert!(html.contains("2026-09-01 00:00 to 2026-09-08 00:00"));
    // A reactor the configuration does not have, and a bad time: exit 1, named.
    let (code, _, stderr) = run(&[
        "report".as_ref(),
        "--config".as_ref(),
        config.as_os_str(),
        "--input".as_ref(),
        results.as_os_str(),
        "--out".as_ref(),
        one.as_os_str(),
        "--reactor".as_ref(),
        "nope".as_ref(),
    ]);
    assert_eq!(code, 1, "{stderr}");
    assert!(stderr.contains("--reactor nope"), "{stderr}");
    let (code, _, stderr) = run(&[
        "report".as_ref(),
        "--config".as_ref(),
        config.as_os_str(),
        "--input".as_ref(),
        results.as_os_str(),
        "--out".as_ref(),
        one.as_os_str(),
        "--from".as_ref(),
        "yesterday".as_ref(),
    ]);
    assert_eq!(code, 1, "{stderr}");
    assert!(stderr.contains("--from \"yesterday\""), "{stderr}");
}

/// One reactor's section of the report.
fn section<'a>(html: &'a str, id: &str) -> &'a str {
    let start = format!("<section class=\"reactor\" id=\"reactor-{id}\">");
    let Some(i) = html.find(&start) else {
        return "";
    };
    let rest = &html[i..];
    let end = rest.find("</section>").unwrap_or(rest.len());
    &rest[..end]
}
