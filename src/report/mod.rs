//! The period's catalyst report (`eqwatch report`): the records `eqwatch replay` writes
//! (or the daemon's journal holds) reduced, one line at a time, to per-reactor, per-day
//! aggregates ([`Aggregator`]), and those written as one self-contained HTML document
//! ([`render`]): a section per reactor with the first against the last full day, the
//! forecasts with their intervals, daily charts (inline SVG from `crate::plot`), the
//! reconciliation's health and the alert and alarm events.
//!
//! Rules of this folder (checked by `tests/architecture.rs`): no I/O and no clock — the
//! caller reads the file and passes each line and the time of writing in — so the whole
//! report is tested from invented records in memory; only the charts, times and units of
//! the crate, serde_json for the records and thiserror for their errors. Never the
//! configuration (the caller names the reactors), the pipeline or the daemon: the report
//! reads what was published, not how it was made.

mod aggregate;
mod html;
mod record;

pub(crate) use aggregate::{Aggregator, LineError, Period, ReactorInfo};
pub(crate) use html::{ReportMeta, render};

#[cfg(test)]
mod tests {
    use super::*;
    use crate::units::DAY_MS;

    /// 2026-09-01T00:00:00Z in epoch ms (`date -u -d @1788220800`).
    const D0: i64 = 1_788_220_800_000;

    fn ts(ms: i64) -> String {
        crate::timefmt::format_rfc3339(ms)
    }

    fn report_of(lines: &[String]) -> String {
        let mut a = Aggregator::new(
            vec![
                ReactorInfo {
                    id: "r1".into(),
                    name: "Shift <converter>".into(),
                },
                ReactorInfo {
                    id: "m1".into(),
                    name: "Methanator".into(),
                },
            ],
            Period::default(),
        );
        for (i, l) in lines.iter().enumerate() {
            let _ = a.add_line(i as u64 + 1, l);
        }
        render(
            &a,
            &ReportMeta {
                site: "Invented & Co".into(),
                input: "results.jsonl".into(),
                generated_at_ms: D0 + 10 * DAY_MS,
            },
        )
    }

    fn lines() -> Vec<String> {
        let mut v = Vec::new();
        for h in 0..72 {
            let t = D0 + h * 3_600_000;
            v.push(
                serde_json::json!({"topic": "x/r1/result", "retain": true, "payload": {
                    "schema": "eqwatch.result/1", "reactor": "r1", "sample_ts": ts(t), "quality": "good",
                    "approach_k": 10.0 + h as f64 / 24.0,
                    "headline": {"figure": "approach", "value": 10.0, "unit": "K"},
                    "drift": {"trend_k_per_day": 1.0, "trend_interval_k_per_day": [0.8, 1.2],
                        "end_of_run": {"state": "forecast", "limit_k": 20.0, "date": "2026-09-12T00:00:00.000Z",
                            "earliest": "2026-09-10T00:00:00.000Z", "latest": "2026-09-15T00:00:00.000Z"}},
                    "bed_profile": {"rise_k": 20.0, "wabt_k": 470.0, "front_depth_m": 1.5, "end_of_life_depth_m": 2.9,
                        "front_trend": {"state": "collecting", "days": 3}},
                    "reconciliation": {"available": true, "suspect": "AI-300 <CO>",
                        "global_test": {"statistic": 20.0, "critical": 12.6, "passed": false}}
                }})
                .to_string(),
            );
            v.push(
                serde_json::json!({"topic": "x/m1/result", "retain": true, "payload": {
                    "schema": "eqwatch.result/1", "reactor": "m1", "sample_ts": ts(t), "quality": "good",
                    "approach_k": null,
                    "reasons": [{"code": "approach_not_meaningful"}],
                    "headline": {"figure": "key-measured", "value": 2.0, "unit": "ppm"},
                    "drift": {"end_of_run": {"state": "no-limit"}}
                }})
                .to_string(),
            );
        }
        v.push(
            serde_json::json!({"topic": "x/r1/alert", "retain": false, "payload": {
                "schema": "eqwatch.event/1", "id": "r1/gross-error#1@5", "reactor": "r1", "class": "alert",
                "alarm": "gross-error", "event": "raised", "at": ts(D0 + 30 * 3_600_000), "state": "unack-active",
                "value": 3.0, "limit": 3.0, "unit": "failed tests", "reason": "<script>alert(1)</script>"
            }})
            .to_string(),
        );
        v.push("{broken".into());
        v
    }

    #[test]
    fn the_report_has_the_advisory_and_every_section() {
        let html = report_of(&lines());
        assert!(html.starts_with("<!DOCTYPE html>"));
        assert!(html.contains("Advisory only: eqwatch is not a safety function"));
        for needle in [
            "id=\"reactor-r1\"",
            "id=\"reactor-m1\"",
            "Start of the period against now",
            "Forecasts at the last result",
            "Reconciliation health",
            "Alerts and alarms",
            "gross-error",
            "2026-09-12",
            "2026-09-10",
            "2026-09-15",
            "1 malformed line",
            "line 146: not a JSON object",
            "@media print",
            "break-before: page",
        ] {
            assert!(html.contains(needle), "{needle} missing");
        }
        // First and last full day: 10.5 K and 12.5 K (the mean of 24 hourly values).
        assert!(html.contains("10.48"), "first day's mean");
        assert!(html.contains("12.48"), "last day's mean");
        // Approach, front and reconciliation charts for r1; the slip for m1, no approach.
        assert_eq!(html.matches("<svg").count(), 4);
        assert_eq!(html.matches("</svg>").count(), 4);
        assert!(html.contains("No approach is charted for m1"));
        assert!(!html.contains("m1-approach"));
        assert!(!html.contains("<script"));
        assert!(
            !html.contains("http://")
                || html.matches("http://").count()
                    == html.matches("xmlns=\"http://www.w3.org/2000/svg\"").count()
        );
    }

    #[test]
    fn a_bad_result_without_the_reason_does_not_bring_back_an_approach_chart() {
        // The demo year's methanator: every good result says the approach is not
        // meaningful, a few bad ones (no evaluation) say nothing about it. Before, those
        // few made the report draw an empty approach chart and an approach row of dashes.
        let mut v = lines();
        v.push(
            serde_json::json!({"topic": "x/m1/result", "retain": true, "payload": {
                "schema": "eqwatch.result/1", "reactor": "m1", "sample_ts": ts(D0 + 3_600_000 * 5 + 60_000),
                "quality": "bad", "approach_k": null, "reasons": [{"code": "missing_component"}],
                "headline": {"figure": "none", "value": null, "unit": ""}
            }})
            .to_string(),
        );
        let html = report_of(&v);
        let m1 = &html[html.find("id=\"reactor-m1\"").unwrap_or(0)..];
        assert!(m1.contains("No approach is charted for m1"), "{m1}");
        assert!(!html.contains("m1-approach"));
        assert!(m1.contains("not meaningful: equilibrium amount below detection"));
        assert!(m1.contains("72 of 73 results"), "{m1}");
    }

    #[test]
    fn suppressions_by_design_are_summed_not_listed() {
        // Three weekly calibrations (invented): approach-high suppressed for 30 min each.
        let mut v = lines();
        for k in 0..3 {
            let at = D0 + 3_600_000 * (10 + k);
            for (event, dt) in [("suppressed", 0), ("unsuppressed", 1_800_000)] {
                v.push(
                    serde_json::json!({"topic": "x/r1/alarm", "retain": false, "payload": {
                        "schema": "eqwatch.event/1", "id": format!("r1/approach-high#{k}{event}"),
                        "reactor": "r1", "class": "alarm", "alarm": "approach-high", "event": event,
                        "at": ts(at + dt), "state": "normal", "value": null, "limit": 20.0, "unit": "K",
                        "reason": "analysis bad: missing_component"
                    }})
                    .to_string(),
                );
            }
        }
        let html = report_of(&v);
        let r1 = &html[html.find("id=\"reactor-r1\"").unwrap_or(0)..];
        assert!(!r1.contains("<td>suppressed</td>"), "listed one by one");
        assert!(r1.contains("Suppressed by design"), "{r1}");
        assert!(
            r1.contains("<td>approach-high</td><td class=\"n\">3</td><td class=\"n\">1.5 h</td><td class=\"n\">30 min</td><td>analysis bad: missing_component (3)</td>"),
            "{r1}"
        );
        // The gross-error alert of the fixture is still listed.
        assert!(r1.contains("gross-error"));
    }

    #[test]
    fn a_narrow_interval_keeps_its_width_visible() {
        // 2.2 mm/day ± 0.02: one decimal would print "+2.2 to +2.2", no width at all.
        let mut v = lines();
        v.push(
            serde_json::json!({"topic": "x/r1/result", "retain": true, "payload": {
                "schema": "eqwatch.result/1", "reactor": "r1", "sample_ts": ts(D0 + 3 * DAY_MS),
                "quality": "good", "approach_k": 13.0,
                "headline": {"figure": "approach", "value": 13.0, "unit": "K"},
                "drift": {"trend_k_per_day": 1.0, "trend_interval_k_per_day": [0.99996, 1.00004],
                    "end_of_run": {"state": "forecast", "limit_k": 20.0, "date": "2026-09-12T00:00:00.000Z",
                        "earliest": "2026-09-10T00:00:00.000Z", "latest": "2026-09-15T00:00:00.000Z"}},
                "bed_profile": {"rise_k": 20.0, "front_depth_m": 1.5, "end_of_life_depth_m": 2.9,
                    "front_trend": {"state": "forecast", "rate_m_per_day": 0.0022,
                        "rate_interval_m_per_day": [0.00218, 0.00222], "end_of_life": "2027-07-05T00:00:00.000Z"}}
            }})
            .to_string(),
        );
        let html = report_of(&v);
        assert!(
            html.contains("+2.20 mm/day (95 %: +2.18 to +2.22)"),
            "{html}"
        );
        assert!(
            html.contains("+1.00000 K/day (95 %: +0.99996 to +1.00004)"),
            "{html}"
        );
    }

    #[test]
    fn text_from_the_records_is_escaped() {
        let html = report_of(&lines());
        assert!(html.contains("Shift &lt;converter&gt; (r1)"));
        assert!(html.contains("Invented &amp; Co"));
        assert!(html.contains("AI-300 &lt;CO&gt;"));
        assert!(html.contains("&lt;script&gt;alert(1)&lt;/script&gt;"));
        assert_eq!(html::esc("a\"b'c\u{1}"), "a&quot;b&#39;c ");
    }
}
