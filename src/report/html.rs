//! The report as one HTML document: inline CSS (with print rules: a page per reactor),
//! inline SVG charts from `crate::plot`, no scripts, no external files.

use std::fmt::Write as _;

use serde_json::Value;

use super::aggregate::{Aggregator, DayAgg, EventRow, Mean, ReactorAgg};
use crate::plot::{DailyChart, DailyLimit, DailySeries, TimeZone, daily_svg};
use crate::timefmt::format_rfc3339;
use crate::units::DAY_MS;

/// What the report says about itself.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct ReportMeta {
    pub(crate) site: String,
    /// The input file as named on the command line.
    pub(crate) input: String,
    /// When the report was written, epoch ms (the caller reads the clock).
    pub(crate) generated_at_ms: i64,
}

/// The advisory notice at the head of every report.
pub(crate) const ADVISORY: &str = "Advisory only: eqwatch is not a safety function. Its \
    figures and alerts do not replace the plant's alarm and safety systems; local codes and \
    licensed engineering practice govern, and the plant's engineers confirm any figure before \
    it drives an operating decision.";

/// Text with `&`, `<`, `>`, `"` and `'` escaped for HTML (text and attribute values).
pub(crate) fn esc(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c if (c as u32) < 0x20 && c != '\n' && c != '\t' => out.push(' '),
            c => out.push(c),
        }
    }
    out
}

fn num(v: Option<f64>, dec: usize) -> String {
    match v {
        Some(x) if x.is_finite() => format!("{x:.dec$}"),
        _ => "–".to_string(),
    }
}

fn date(ms: i64) -> String {
    format_rfc3339(ms).chars().take(10).collect()
}

/// "2026-09-03 14:05" (UTC).
fn when(ms: i64) -> String {
    let s = format_rfc3339(ms);
    format!("{} {}", &s[..10.min(s.len())], s.get(11..16).unwrap_or(""))
}

/// Decimals for a figure and its interval: `base`, or more until the interval's ends
/// print apart (at most `base + 4`), so that a narrow interval does not read as none
/// ("+2.2 to +2.2").
fn interval_decimals(lo: f64, hi: f64, base: usize) -> usize {
    (base..=base + 4)
        .find(|d| format!("{lo:+.d$}") != format!("{hi:+.d$}"))
        .unwrap_or(base + 4)
}

/// A date text of the result (RFC 3339) shown as its day.
fn day_text(v: Option<&Value>) -> String {
    match v.and_then(Value::as_str) {
        Some(s) => esc(s.get(..10).unwrap_or(s)),
        None => "–".to_string(),
    }
}

/// The latest date of a forecast: without one, the interval is open (the trend's lower
/// bound does not reach the limit).
fn latest_text(forecast: Option<&Value>, state: &str) -> String {
    match forecast.and_then(|f| f.get("latest")) {
        None if state == "forecast" => "open (not bounded)".to_string(),
        v => day_text(v),
    }
}

const CSS: &str = "
body { font-family: sans-serif; font-size: 10.5pt; color: #222; margin: 1.2em auto; max-width: 1040px; padding: 0 1em; }
h1 { font-size: 17pt; margin: 0 0 .3em; } h2 { font-size: 14pt; margin: 1.2em 0 .4em; border-bottom: 2px solid #0072b2; }
h3 { font-size: 11.5pt; margin: 1em 0 .3em; }
table { border-collapse: collapse; margin: .3em 0 .8em; }
th, td { border: 1px solid #bbb; padding: 2px 7px; text-align: left; vertical-align: top; }
th { background: #eef3f8; } td.n { text-align: right; font-variant-numeric: tabular-nums; }
.notice { border: 2px solid #b2182b; background: #fff4f2; padding: .5em .8em; margin: .6em 0; }
.meta td:first-child { font-weight: bold; } .muted { color: #666; }
.chart svg { width: 100%; height: auto; display: block; } .chart { margin: .4em 0 .8em; }
table.events { font-size: 9pt; } table.events td.id { color: #666; font-size: 8pt; }
@page { size: A4; margin: 12mm; }
@media print {
  body { max-width: none; margin: 0; padding: 0; font-size: 9.5pt; }
  section.reactor { break-before: page; }
  .chart, table.summary, .forecasts { break-inside: avoid; }
  tr { break-inside: avoid; }
}
";

/// The whole report.
pub(crate) fn render(agg: &Aggregator, meta: &ReportMeta) -> String {
    let mut out = String::with_capacity(64 * 1024);
    let period_from = agg.period.from_ms.or(agg.counts.first_ms);
    let period_to = agg.period.to_ms.or(agg.counts.last_ms);
    let period = match (period_from, period_to) {
        (Some(a), Some(b)) => format!("{} to {} (UTC)", when(a), when(b)),
        _ => "no records in the period".to_string(),
    };
    let title = format!("Catalyst report, {}: {}", meta.site, period);
    let _ = write!(
        out,
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>{}</title><style>{CSS}</style></head><body>\n",
        esc(&title)
    );
    let _ = write!(
        out,
        "<header><h1>Catalyst report: {}</h1><table class=\"meta\">\
         <tr><td>site</td><td>{}</td></tr><tr><td>period</td><td>{}</td></tr>\
         <tr><td>generated</td><td>{} (UTC)</td></tr><tr><td>input</td><td>{}</td></tr>\
         <tr><td>read</td><td>{} lines: {} results and {} events in the period; {} outside it; {} other records; {} of reactors not in this report</td></tr>\
         <tr><td>skipped</td><td>{} malformed line{}</td></tr></table>",
        esc(&meta.site),
        esc(&meta.site),
        esc(&period),
        esc(&when(meta.generated_at_ms)),
        esc(&meta.input),
        agg.counts.lines,
        agg.counts.results,
        agg.counts.events,
        agg.counts.outside_period,
        agg.counts.other_records,
        agg.counts.other_reactors,
        agg.counts.malformed,
        if agg.counts.malformed == 1 { "" } else { "s" },
    );
    if !agg.counts.problems.is_empty() {
        out.push_str("<p class=\"muted\">First skipped lines: ");
        let list: Vec<String> = agg
            .counts
            .problems
            .iter()
            .map(|(line, why)| format!("line {line}: {}", esc(why)))
            .collect();
        out.push_str(&list.join("; "));
        out.push_str("</p>");
    }
    let _ = write!(
        out,
        "<p class=\"notice\"><strong>{}</strong></p>",
        esc(ADVISORY)
    );
    out.push_str(
        "<p class=\"muted\">Days are UTC days. Means are over good-quality results only; \
         “first day” and “last day” are the first and last full days of the period.</p></header>\n",
    );
    for r in &agg.reactors {
        reactor_section(&mut out, agg, r, period_from, period_to);
    }
    if !agg.plant_events.is_empty() {
        out.push_str("<section class=\"plant\"><h2>Plant-wide events</h2>");
        events_table(&mut out, &agg.plant_events, agg.plant_events_left_out);
        out.push_str("</section>");
    }
    let _ = writeln!(
        out,
        "<footer><p class=\"muted\">eqwatch catalyst report. {}</p></footer></body></html>",
        esc(ADVISORY)
    );
    out
}

fn series(r: &ReactorAgg, name: &str, pick: impl Fn(&DayAgg) -> &Mean) -> DailySeries {
    DailySeries {
        name: name.to_string(),
        days: r.days.iter().map(|(d, a)| (*d, pick(a).mean())).collect(),
    }
}

fn chart_frame(id: String, title: String, y_label: &str, from: i64, to: i64) -> DailyChart {
    DailyChart {
        id,
        title,
        y_label: y_label.to_string(),
        from_ms: from,
        to_ms: to,
        ..DailyChart::default()
    }
}

fn push_chart(out: &mut String, c: &DailyChart) {
    out.push_str("<div class=\"chart\">");
    out.push_str(&daily_svg(c, TimeZone::UTC));
    out.push_str("</div>");
}

fn reactor_section(
    out: &mut String,
    agg: &Aggregator,
    r: &ReactorAgg,
    from: Option<i64>,
    to: Option<i64>,
) {
    let id = esc(&r.info.id);
    let _ = write!(
        out,
        "<section class=\"reactor\" id=\"reactor-{id}\"><h2>{} ({id})</h2>",
        esc(&r.info.name)
    );
    let total: u64 = r.quality.iter().sum();
    let _ = write!(
        out,
        "<p>Evaluations in the period: {total} (good {}, uncertain {}, bad {}).</p>",
        r.quality[0], r.quality[1], r.quality[2]
    );
    if total == 0 {
        out.push_str("<p class=\"muted\">No results of this reactor in the period.</p>");
    }
    // The approach is charted when a good result had one, or when none said it is not
    // meaningful; a few bad results (no evaluation, so no reason about the approach)
    // among a methanator's must not bring back an empty approach chart.
    let has_approach = r.days.values().any(|d| d.approach_k.n > 0);
    let meaningful = has_approach || r.not_meaningful == 0;
    summary_table(out, agg, r, meaningful);
    forecasts(out, r);

    // Charts: daily means, the axis over the period's whole days.
    let (Some(first_day), Some(last_day)) = (r.days.keys().next(), r.days.keys().next_back())
    else {
        events_section(out, r);
        out.push_str("</section>\n");
        return;
    };
    let t0 = from
        .map_or(*first_day, |f| f.div_euclid(DAY_MS) * DAY_MS)
        .min(*first_day);
    let t1 = to
        .map_or(last_day + DAY_MS, |t| {
            (t + DAY_MS - 1).div_euclid(DAY_MS) * DAY_MS
        })
        .max(last_day + DAY_MS);
    out.push_str("<h3>Daily means</h3>");
    if meaningful {
        let mut c = chart_frame(
            format!("{}-approach", r.info.id),
            format!(
                "{}: approach to equilibrium, daily mean of good results",
                r.info.id
            ),
            "approach (K)",
            t0,
            t1,
        );
        c.series
            .push(series(r, "approach, measured (K)", |d| &d.approach_k));
        if r.has_normalise {
            c.series
                .push(series(r, "normalised approach (K)", |d| &d.normalised_k));
        }
        push_chart(out, &c);
    } else {
        let _ = write!(
            out,
            "<p class=\"notice\">No approach is charted for {id}: {} of {total} results said the \
             approach is not meaningful (the equilibrium amount is below the analyser's detection \
             limit), and no good result had one.</p>",
            r.not_meaningful
        );
    }
    if let Some((figure, unit)) = &r.headline_other {
        let what = if figure == "key-measured" {
            "key component measured slip"
        } else {
            figure.as_str()
        };
        let mut c = chart_frame(
            format!("{}-headline", r.info.id),
            format!("{}: {what}, daily mean of good results", r.info.id),
            &format!("{what} ({unit})"),
            t0,
            t1,
        );
        c.series
            .push(series(r, &format!("{what} ({unit})"), |d| &d.headline));
        push_chart(out, &c);
    }
    if r.has_bed {
        let mut c = chart_frame(
            format!("{}-front", r.info.id),
            format!("{}: reaction front depth in the bed, daily mean", r.info.id),
            "front depth from the bed top (m)",
            t0,
            t1,
        );
        c.series
            .push(series(r, "front depth (m)", |d| &d.front_depth_m));
        c.limit = r.end_of_life_depth_m.map(|v| DailyLimit {
            value: v,
            label: format!("end-of-life depth {v:.2} m"),
        });
        c.inverted = true;
        push_chart(out, &c);
    }
    if r.has_reconcile {
        let mut c = chart_frame(
            format!("{}-reconcile", r.info.id),
            format!(
                "{}: balances' global test, statistic / critical value, daily mean",
                r.info.id
            ),
            "global test statistic / critical (–)",
            t0,
            t1,
        );
        c.series
            .push(series(r, "statistic / critical, daily mean (–)", |d| {
                &d.test_ratio
            }));
        c.limit = Some(DailyLimit {
            value: 1.0,
            label: "critical value (ratio 1)".into(),
        });
        c.flagged_days = r
            .days
            .iter()
            .filter(|(_, d)| d.tests > 0 && 2 * d.tests_failed > d.tests)
            .map(|(k, _)| *k)
            .collect();
        c.flag_label = "days when most global tests failed".into();
        push_chart(out, &c);
        reconciliation_health(out, r);
    }
    events_section(out, r);
    out.push_str("</section>\n");
}

fn summary_table(out: &mut String, agg: &Aggregator, r: &ReactorAgg, meaningful: bool) {
    let Some(((d0, a), (d1, b), full)) = r.first_and_last_day(&agg.period) else {
        return;
    };
    out.push_str("<h3>Start of the period against now</h3>");
    if !full {
        out.push_str("<p class=\"muted\">No full day in the period: the first and last days with results.</p>");
    }
    let _ = write!(
        out,
        "<table class=\"summary\"><tr><th>figure</th><th>unit</th>\
         <th>first day {}</th><th>last day {}</th><th>change</th></tr>",
        date(d0),
        date(d1)
    );
    let row = |out: &mut String,
               what: &str,
               unit: &str,
               x: Option<f64>,
               y: Option<f64>,
               dec: usize| {
        let change = match (x, y) {
            (Some(x), Some(y)) => format!("{:+.dec$}", y - x),
            _ => "–".into(),
        };
        let _ = write!(
            out,
            "<tr><td>{}</td><td>{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td><td class=\"n\">{change}</td></tr>",
            esc(what),
            esc(unit),
            num(x, dec),
            num(y, dec)
        );
    };
    if meaningful {
        row(
            out,
            "approach, mean",
            "K",
            a.approach_k.mean(),
            b.approach_k.mean(),
            2,
        );
    } else {
        out.push_str(
            "<tr><td>approach</td><td>K</td><td colspan=\"3\">not meaningful: equilibrium amount below detection</td></tr>",
        );
    }
    if let Some((figure, unit)) = &r.headline_other {
        let what = if figure == "key-measured" {
            "key component slip, mean"
        } else {
            figure.as_str()
        };
        row(out, what, unit, a.headline.mean(), b.headline.mean(), 3);
    }
    if r.has_normalise {
        row(
            out,
            "normalised approach, mean",
            "K",
            a.normalised_k.mean(),
            b.normalised_k.mean(),
            2,
        );
    }
    if r.has_bed {
        row(
            out,
            "bed rise, mean",
            "K",
            a.rise_k.mean(),
            b.rise_k.mean(),
            2,
        );
        row(out, "WABT, mean", "K", a.wabt_k.mean(), b.wabt_k.mean(), 2);
        row(
            out,
            "front depth, mean",
            "m",
            a.front_depth_m.mean(),
            b.front_depth_m.mean(),
            3,
        );
    }
    row(
        out,
        "trend at the day's end",
        "K/day",
        a.trend_k_per_day,
        b.trend_k_per_day,
        4,
    );
    let q = |d: &DayAgg| format!("{} / {} / {}", d.quality[0], d.quality[1], d.quality[2]);
    let _ = write!(
        out,
        "<tr><td>evaluations good / uncertain / bad</td><td>count</td><td class=\"n\">{}</td><td class=\"n\">{}</td><td></td></tr></table>",
        q(a),
        q(b)
    );
}

fn forecasts(out: &mut String, r: &ReactorAgg) {
    if r.last_ms.is_none() {
        return;
    }
    out.push_str("<div class=\"forecasts\"><h3>Forecasts at the last result</h3><table><tr><th>forecast</th><th>state</th><th>date</th><th>earliest</th><th>latest</th><th>rate</th></tr>");
    let trend = match (r.trend_k_per_day, r.trend_interval) {
        (Some(t), Some((lo, hi))) => {
            let d = interval_decimals(lo, hi, 4);
            format!("{t:+.d$} K/day (95 %: {lo:+.d$} to {hi:+.d$})")
        }
        (Some(t), None) => format!("{t:+.4} K/day"),
        _ => "–".into(),
    };
    let e = r.end_of_run.as_ref();
    let state = e
        .and_then(|e| e.get("state"))
        .and_then(Value::as_str)
        .unwrap_or("–");
    let limit = e
        .and_then(|e| e.get("limit_k"))
        .and_then(Value::as_f64)
        .map_or(String::new(), |l| format!(" (limit {l:.1} K)"));
    let _ = write!(
        out,
        "<tr><td>end of run{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
        esc(&limit),
        esc(state),
        day_text(e.and_then(|e| e.get("date"))),
        day_text(e.and_then(|e| e.get("earliest"))),
        latest_text(e, state),
        esc(&trend)
    );
    if let Some(f) = r.front_trend.as_ref() {
        let state = f.get("state").and_then(Value::as_str).unwrap_or("–");
        let rate = match (
            f.get("rate_m_per_day").and_then(Value::as_f64),
            f.pointer("/rate_interval_m_per_day/0")
                .and_then(Value::as_f64),
            f.pointer("/rate_interval_m_per_day/1")
                .and_then(Value::as_f64),
        ) {
            (Some(v), Some(lo), Some(hi)) => {
                let (v, lo, hi) = (v * 1e3, lo * 1e3, hi * 1e3);
                let d = interval_decimals(lo, hi, 1);
                format!("{v:+.d$} mm/day (95 %: {lo:+.d$} to {hi:+.d$})")
            }
            (Some(v), _, _) => format!("{:+.1} mm/day", v * 1e3),
            _ => "–".into(),
        };
        let depth = r
            .end_of_life_depth_m
            .map_or(String::new(), |d| format!(" (at {d:.2} m)"));
        let _ = write!(
            out,
            "<tr><td>bed front end of life{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            esc(&depth),
            esc(state),
            day_text(f.get("end_of_life")),
            day_text(f.get("earliest")),
            latest_text(Some(f), state),
            esc(&rate)
        );
    }
    out.push_str("</table></div>");
}

fn reconciliation_health(out: &mut String, r: &ReactorAgg) {
    out.push_str("<h3>Reconciliation health</h3>");
    let share = if r.tests > 0 {
        format!("{:.1} %", 100.0 * r.tests_passed as f64 / r.tests as f64)
    } else {
        "–".into()
    };
    let _ = write!(
        out,
        "<p>Global test passed by {share} of {} tested results ({} passed); {} results without a reconciliation.</p>",
        r.tests, r.tests_passed, r.reconcile_unavailable
    );
    let top = r.top_suspects(8);
    if top.is_empty() {
        out.push_str("<p class=\"muted\">No instrument was named suspect.</p>");
        return;
    }
    out.push_str("<table><tr><th>instrument named suspect</th><th>results</th></tr>");
    for (tag, n) in top {
        let _ = write!(
            out,
            "<tr><td>{}</td><td class=\"n\">{n}</td></tr>",
            esc(tag)
        );
    }
    out.push_str("</table>");
}

fn events_section(out: &mut String, r: &ReactorAgg) {
    out.push_str("<h3>Alerts and alarms</h3>");
    if r.events.is_empty() {
        out.push_str("<p class=\"muted\">No alert or alarm events in the period.</p>");
    } else {
        events_table(out, &r.events, r.events_left_out);
    }
    suppressions_table(out, r);
}

/// Hours with one decimal, or minutes below an hour.
fn span(ms: i64) -> String {
    let min = ms as f64 / 60_000.0;
    if min < 60.0 {
        format!("{min:.0} min")
    } else {
        format!("{:.1} h", min / 60.0)
    }
}

/// Suppression by design, summed per alert or alarm (not listed event by event).
fn suppressions_table(out: &mut String, r: &ReactorAgg) {
    if r.suppressions.is_empty() {
        return;
    }
    out.push_str(
        "<p>Suppressed by design (while the analysis was bad or the unit off line; \
         summed here, not listed above):</p>\
         <table class=\"events\"><tr><th>alert / alarm</th><th>times</th><th>in all</th>\
         <th>longest</th><th>why</th></tr>",
    );
    for (alarm, s) in &r.suppressions {
        let mut why: Vec<(&String, &u64)> = s.reasons.iter().collect();
        why.sort_by(|a, b| b.1.cmp(a.1).then(a.0.cmp(b.0)));
        let why: Vec<String> = why
            .iter()
            .take(3)
            .map(|(w, n)| {
                let w = if w.is_empty() { "no reason given" } else { w };
                format!("{w} ({n})")
            })
            .collect();
        let open = s.open_since_ms.map_or(String::new(), |t| {
            format!("; still suppressed since {}", when(t))
        });
        let _ = write!(
            out,
            "<tr><td>{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td><td>{}{}</td></tr>",
            esc(alarm),
            s.times,
            esc(&span(s.total_ms)),
            esc(&span(s.longest_ms)),
            esc(&why.join("; ")),
            esc(&open)
        );
    }
    out.push_str("</table>");
}

fn events_table(out: &mut String, events: &[EventRow], left_out: u64) {
    out.push_str(
        "<table class=\"events\"><tr><th>time (UTC)</th><th>kind</th><th>alert / alarm</th><th>event</th>\
         <th>state</th><th>value</th><th>limit</th><th>unit</th><th>note</th><th>id</th></tr>",
    );
    for e in events {
        let _ = write!(
            out,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td><td>{}</td><td>{}</td><td class=\"id\">{}</td></tr>",
            esc(&when(e.at_ms)),
            esc(&e.class),
            esc(&e.alarm),
            esc(&e.event),
            esc(&e.state),
            num(e.value, 3),
            num(e.limit, 3),
            esc(&e.unit),
            esc(&e.note),
            esc(&e.id)
        );
    }
    out.push_str("</table>");
    if left_out > 0 {
        let _ = write!(
            out,
            "<p class=\"muted\">{left_out} more events in the period are not listed.</p>"
        );
    }
}
