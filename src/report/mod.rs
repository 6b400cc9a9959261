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
    fn text_from_the_records_is_escaped() {
        let html = report_of(&lines());
        assert!(html.contains("Shift &lt;converter&gt; (r1)"));
        assert!(html.contains("Invented &amp; Co"));
        assert!(html.contains("AI-300 &lt;CO&gt;"));
        assert!(html.contains("&lt;script&gt;alert(1)&lt;/script&gt;"));
        assert_eq!(html::esc("a\"b'c\u{1}"), "a&quot;b&#39;c ");
    }
}
