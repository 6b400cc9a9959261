//! `eqwatch demo`: the invented Brackwater Ammonia Works (train 1) in compressed time.
//! An embedded broker (or `--broker URL`), a drop-out proxy between the daemon and the
//! broker, the simulated plant publishing instrument readings, the daemon on
//! `config/demo-plant.toml` with its statistics windows compressed to minutes
//! ([`compress_watch`]), and a live table of what the daemon publishes: results with
//! their trend and end-of-run forecast, the alerts and alarms annunciating, and the
//! latest alert/alarm events. At exit, SVG plots of the run in `<workdir>/plots/`.
//!
//! The console is a client of the broker like any other: what it shows and plots comes
//! from the messages it receives (results, events, retained alarm states), never from
//! the daemon's memory. Retained copies found at subscription are left out: on a shared
//! broker they may be from an earlier run.

use std::collections::{BTreeMap, BTreeSet, HashSet};
use std::io::{IsTerminal, Write};
use std::net::{SocketAddr, ToSocketAddrs};
use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

use rumqttc::{AsyncClient, Event, Incoming, MqttOptions, QoS};
use serde_json::Value;
use tokio_util::sync::CancellationToken;

use super::proxy::DropoutProxy;
use super::sim::Plant;
use crate::cli::CliError;
use crate::config::Settings;
use crate::daemon::{Clock, now_ms};
use crate::monitor::watch::BaselineSpec;
use crate::plot::{BaselineSpan, Marker, MarkerKind, PlotPoint, Projection, ReactorPlot};
use crate::timefmt::parse_rfc3339;

/// The reference configuration of the demo plant (compiled in, so the demo runs from any folder).
pub const DEMO_CONFIG: &str = include_str!("../../config/demo-plant.toml");

use crate::units::{DAY_MS, HOUR_MS, MINUTE_MS};

// The demo's compressed statistics windows. The configuration's windows are for a real
// plant (a baseline learned over a week, one trend point a day); in a demo of about an
// hour and a half of plant time they would never fill. One analysis every 5 minutes
// (invented demo scenario, src/demo/sim.rs) gives a baseline after 15 minutes and a trend
// after 5 more points. A trend point stands for a day of the configuration, so the alert
// rates (K/d) are scaled up and the end-of-run horizons (d) down by the same factor:
// unscaled, the noise of a handful of 5-minute points (tens of K/d) would raise the
// trend and end-of-run alerts before anything happens in the plant.

/// Baseline learned over this much plant time ...
pub const DEMO_BASELINE_WINDOW_MS: i64 = 15 * MINUTE_MS;
/// ... from at least this many usable analyses.
pub const DEMO_BASELINE_MIN_SAMPLES: usize = 3;
/// One trend point (aggregate) per analyser cycle, from one analysis.
pub const DEMO_AGGREGATE_MS: i64 = 5 * MINUTE_MS;
pub const DEMO_MIN_PER_AGGREGATE: usize = 1;
/// Trend points before a trend (and an end-of-run forecast) is reported.
pub const DEMO_MIN_AGGREGATES: usize = 5;
/// A day of the configuration's trend becomes this much shorter (one trend point).
pub const DEMO_DAY_FACTOR: f64 = DAY_MS as f64 / DEMO_AGGREGATE_MS as f64;
/// Data-quality alert when no good result has come for this long.
pub const DEMO_DATA_QUALITY_AFTER_MS: i64 = 20 * MINUTE_MS;
/// lts1: end-of-run alert when the forecast is this close (not scaled). Its approach
/// creeps 0.2 K/h from 10 K (invented demo scenario, src/demo/sim.rs) towards its 20 K limit,
/// about two days; within the demo that creep (0.3 K) is smaller than the analysis noise,
/// so whether the forecast comes within 3 d depends on the noise.
pub const DEMO_LTS_END_OF_RUN_WITHIN_DAYS: f64 = 3.0;

/// Event lines kept under the live table (terminal only).
const RECENT_EVENTS: usize = 6;
/// The live table fits this many columns.
const TABLE_WIDTH: usize = 100;
/// Where the alarms-and-alerts column starts.
const FLAGS_COLUMN: usize = 62;

fn input<E: std::fmt::Display>(what: &str) -> impl Fn(E) -> CliError + '_ {
    move |e| CliError::Input(format!("{what}: {e}"))
}

fn internal<E: std::fmt::Display>(what: &str) -> impl Fn(E) -> CliError + '_ {
    move |e| CliError::Internal(format!("{what}: {e}"))
}

/// `mqtt://host:port` to a socket address.
fn broker_addr(url: &str) -> Result<SocketAddr, CliError> {
    let rest = url.trim().strip_prefix("mqtt://").ok_or_else(|| {
        CliError::Input(format!(
            "--broker `{url}`: the demo takes mqtt://host:port (plain TCP)"
        ))
    })?;
    let rest = rest.trim_end_matches('/');
    let with_port = if rest.contains(':') {
        rest.to_string()
    } else {
        format!("{rest}:1883")
    };
    with_port
        .to_socket_addrs()
        .map_err(input("--broker"))?
        .next()
        .ok_or_else(|| CliError::Input(format!("--broker `{url}` does not resolve")))
}

/// Shortens the drift statistics and alert windows of every reactor so they act within
/// the demo's plant time; returns the console line that says so.
pub fn compress_watch(settings: &mut Settings) -> String {
    for r in &mut settings.reactors {
        let d = &mut r.spec.watch.drift;
        if let BaselineSpec::Learn { .. } = d.baseline {
            d.baseline = BaselineSpec::Learn {
                window_ms: DEMO_BASELINE_WINDOW_MS,
                min_samples: DEMO_BASELINE_MIN_SAMPLES,
            };
        }
        d.aggregate_ms = DEMO_AGGREGATE_MS;
        d.min_per_aggregate = DEMO_MIN_PER_AGGREGATE;
        d.trend_window_ms = None;
        d.min_aggregates = DEMO_MIN_AGGREGATES;
        let a = &mut r.spec.watch.alerts;
        if let Some(x) = a.trend_above_k_per_day.as_mut() {
            *x *= DEMO_DAY_FACTOR;
        }
        if let Some(x) = a.end_of_run_within_days.as_mut() {
            *x /= DEMO_DAY_FACTOR;
        }
        if a.data_quality_after_ms.is_some() {
            a.data_quality_after_ms = Some(DEMO_DATA_QUALITY_AFTER_MS);
        }
        if r.spec.id == "lts1" && d.end_of_run_limit_k.is_some() {
            a.end_of_run_within_days = Some(DEMO_LTS_END_OF_RUN_WITHIN_DAYS);
        }
    }
    format!(
        "statistics windows compressed for the demo (a configured day = {} min): baseline over {} min ({}+ analyses), trend point per {} min, trend from {} points, alert rates x{:.0}, end-of-run horizons /{:.0} (lts1: {} d), data-quality after {} min",
        DEMO_AGGREGATE_MS / MINUTE_MS,
        DEMO_BASELINE_WINDOW_MS / MINUTE_MS,
        DEMO_BASELINE_MIN_SAMPLES,
        DEMO_AGGREGATE_MS / MINUTE_MS,
        DEMO_MIN_AGGREGATES,
        DEMO_DAY_FACTOR,
        DEMO_DAY_FACTOR,
        DEMO_LTS_END_OF_RUN_WITHIN_DAYS,
        DEMO_DATA_QUALITY_AFTER_MS / MINUTE_MS,
    )
}

// ---------------------------------------------------------------------------------------------
// What the console has received
// ---------------------------------------------------------------------------------------------

/// One alert or alarm event as received on `<prefix>/<reactor>/alert|alarm` (or the
/// plant-wide `<prefix>/alert`, reactor "plant").
#[derive(Debug, Clone, PartialEq)]
struct SeenEvent {
    at_ms: i64,
    reactor: String,
    class: String,
    alarm: String,
    event: String,
    value: Option<f64>,
    limit: Option<f64>,
    unit: String,
    direction: String,
    reason: Option<String>,
    /// What the alert watches, or an operator alarm's rationale (why it exists and what
    /// the operator does), as the payload says.
    description: String,
}

impl SeenEvent {
    fn raised(&self) -> bool {
        self.event == "raised" || self.event == "re-alarmed"
    }

    fn what(&self) -> String {
        let class = if self.class == "alarm" {
            "ALARM"
        } else {
            "alert"
        };
        format!("{class} {}", self.alarm)
    }

    /// `+42 min ref1 ALARM approach-high raised (25.1 K > 20 K)`.
    fn line(&self, start_ms: i64) -> String {
        let mut s = format!(
            "{} {} {} {}",
            plant_minutes(self.at_ms, start_ms),
            self.reactor,
            self.what(),
            self.event
        );
        let cmp = if self.direction == "low" { "<" } else { ">" };
        // End-of-run horizons of a few days or less read better in hours.
        let (k, unit) = match (self.unit.as_str(), self.limit) {
            ("d", Some(l)) if l < 2.0 => (24.0, "h"),
            _ => (1.0, self.unit.as_str()),
        };
        match (self.value, self.limit) {
            (Some(v), Some(l)) if self.raised() => s.push_str(&format!(
                " ({} {cmp} {})",
                with_unit(past(v * k, l * k, self.direction != "low"), unit),
                with_unit(short(l * k), unit)
            )),
            (Some(v), _) if self.event == "cleared" => {
                s.push_str(&format!(" ({})", with_unit(num(v * k), unit)));
            }
            _ => {}
        }
        if let Some(r) = &self.reason {
            s.push_str(&format!(": {r}"));
        }
        s
    }

    /// The rationale shown under an operator alarm's raised or re-alarmed event: the
    /// operator sees why the alarm exists and what to do where the alarm appears.
    fn rationale(&self) -> Option<&str> {
        (self.class == "alarm" && self.raised() && !self.description.is_empty())
            .then_some(self.description.as_str())
    }

    /// `  ! <line>` and, for an operator alarm raised, `      rationale: ...`, filled to
    /// at most `width` characters a line.
    fn lines(&self, start_ms: i64, width: usize) -> Vec<String> {
        let mut out = fill(&self.line(start_ms), "  ! ", EVENT_INDENT, width);
        if let Some(r) = self.rationale() {
            out.extend(fill(
                &format!("rationale: {r}"),
                EVENT_INDENT,
                EVENT_INDENT,
                width,
            ));
        }
        out
    }
}

/// Continuation lines of an event.
const EVENT_INDENT: &str = "      ";

/// Fills `text` into lines of at most `width` characters: the first starts with `first`,
/// the others with `rest`; words are kept whole unless one is longer than a line.
fn fill(text: &str, first: &str, rest: &str, width: usize) -> Vec<String> {
    let mut lines = Vec::new();
    let mut cur = first.to_string();
    let mut empty = true;
    let room = |prefix: &str| width.saturating_sub(prefix.chars().count()).max(1);
    for word in text.split_whitespace() {
        let mut word: Vec<char> = word.chars().collect();
        loop {
            let used = cur.chars().count();
            let need = word.len() + usize::from(!empty);
            if used + need <= width {
                if !empty {
                    cur.push(' ');
                }
                cur.extend(word.iter());
                empty = false;
                break;
            }
            if empty {
                // A word longer than a whole line: cut it.
                let take = room(&cur).min(word.len());
                cur.extend(word.drain(..take));
                lines.push(std::mem::replace(&mut cur, rest.to_string()));
                if word.is_empty() {
                    break;
                }
                continue;
            }
            lines.push(std::mem::replace(&mut cur, rest.to_string()));
            empty = true;
        }
    }
    if !empty {
        lines.push(cur);
    }
    lines
}

/// What the console knows about one reactor.
#[derive(Debug, Default)]
struct ReactorSeen {
    /// The result with the newest sample time, and its sample time.
    latest: Option<(i64, Value)>,
    results: u64,
    /// The retained alert/alarm states (`eqwatch.alarms/1`), newest.
    states: Option<(i64, Value)>,
    /// Plotted points by sample time (a result delivered twice counts once).
    points: BTreeMap<i64, PlotPoint>,
    key_component: Option<String>,
    /// Baseline per run start: (approach K, σ K).
    baselines: BTreeMap<i64, (f64, Option<f64>)>,
    /// Sample times that went into the statistics.
    included: BTreeSet<i64>,
    limit_k: Option<f64>,
}

impl ReactorSeen {
    fn drift(&self) -> Option<&Value> {
        self.latest
            .as_ref()
            .map(|(_, v)| &v["drift"])
            .filter(|d| d.is_object())
    }
}

#[derive(Debug, Default)]
struct Seen {
    reactors: BTreeMap<String, ReactorSeen>,
    /// Alert and alarm events in arrival order.
    events: Vec<SeenEvent>,
    event_ids: HashSet<String>,
}

impl Seen {
    fn take(&mut self, topic: &str, v: &Value) {
        if topic.ends_with("/result") {
            self.result(v);
        } else if topic.ends_with("/alarms") {
            self.states(v);
        } else if topic.ends_with("/alert") || topic.ends_with("/alarm") {
            self.event(v);
        }
    }

    fn result(&mut self, v: &Value) {
        let Some(id) = v["reactor"].as_str() else {
            return;
        };
        let Some(t) = v["sample_ts"].as_str().and_then(parse_rfc3339) else {
            return;
        };
        let u = self.reactors.entry(id.to_string()).or_default();
        u.results += 1;
        let quality = v["quality"].as_str().unwrap_or("bad");
        u.points.insert(
            t,
            PlotPoint {
                t_ms: t,
                approach_k: v["approach_k"].as_f64().filter(|_| quality != "bad"),
                uncertainty_k: v["approach_uncertainty_k"].as_f64(),
                good: quality == "good",
                key_measured: v["key_measured_mole_fraction"].as_f64(),
                key_equilibrium: v["key_equilibrium_mole_fraction"].as_f64(),
            },
        );
        if let Some(k) = v["key_component"].as_str() {
            u.key_component = Some(k.to_string());
        }
        let d = &v["drift"];
        if d["included"] == true {
            u.included.insert(t);
        }
        if let (Some(start), Some(b)) = (
            d["run_start"].as_str().and_then(parse_rfc3339),
            d["baseline_k"].as_f64(),
        ) {
            u.baselines
                .insert(start, (b, d["baseline_sigma_k"].as_f64()));
        }
        if let Some(l) = d["end_of_run"]["limit_k"].as_f64() {
            u.limit_k = Some(l);
        }
        if u.latest.as_ref().is_none_or(|(lt, _)| t >= *lt) {
            u.latest = Some((t, v.clone()));
        }
    }

    fn states(&mut self, v: &Value) {
        // The plant-wide `<prefix>/alarms` names no reactor.
        let Some(id) = v["reactor"].as_str() else {
            return;
        };
        let at = v["at"].as_str().and_then(parse_rfc3339).unwrap_or(i64::MIN);
        let u = self.reactors.entry(id.to_string()).or_default();
        if u.states.as_ref().is_none_or(|(t, _)| at >= *t) {
            u.states = Some((at, v.clone()));
        }
    }

    fn event(&mut self, v: &Value) {
        let (Some(id), Some(at_ms)) = (v["id"].as_str(), v["at"].as_str().and_then(parse_rfc3339))
        else {
            return;
        };
        // QoS 1 may deliver twice; the id is stable across redelivery.
        if !self.event_ids.insert(id.to_string()) {
            return;
        }
        let text = |k: &str| v[k].as_str().unwrap_or("").to_string();
        self.events.push(SeenEvent {
            at_ms,
            reactor: v["reactor"].as_str().unwrap_or("plant").to_string(),
            class: text("class"),
            alarm: text("alarm"),
            event: text("event"),
            value: v["value"].as_f64(),
            limit: v["limit"].as_f64(),
            unit: text("unit"),
            direction: text("direction"),
            reason: v["reason"].as_str().map(str::to_string),
            description: text("description"),
        });
    }
}

type Shared = Arc<Mutex<Seen>>;

fn lock(seen: &Shared) -> std::sync::MutexGuard<'_, Seen> {
    seen.lock().unwrap_or_else(|e| e.into_inner())
}

fn listen(rt_client: (AsyncClient, rumqttc::EventLoop), filters: Vec<String>, seen: Shared) {
    let (client, mut ev) = rt_client;
    tokio::spawn(async move {
        loop {
            match ev.poll().await {
                Ok(Event::Incoming(Incoming::ConnAck(_))) => {
                    for f in &filters {
                        let _ = client.subscribe(f.clone(), QoS::AtLeastOnce).await;
                    }
                }
                // Retained copies sent at subscription may be from an earlier run; the
                // broker forwards this run's messages with the retain flag cleared.
                Ok(Event::Incoming(Incoming::Publish(p))) if !p.retain => {
                    if let Ok(v) = serde_json::from_slice::<Value>(&p.payload) {
                        lock(&seen).take(&p.topic, &v);
                    }
                }
                Ok(_) => {}
                Err(_) => tokio::time::sleep(Duration::from_millis(200)).await,
            }
        }
    });
}

// ---------------------------------------------------------------------------------------------
// The live table
// ---------------------------------------------------------------------------------------------

fn fmt_opt(v: &Value, digits: usize) -> String {
    v.as_f64().map_or("-".into(), |x| format!("{x:.digits$}"))
}

/// A value with one decimal (none from 100 up).
fn num(x: f64) -> String {
    if x.abs() >= 100.0 {
        format!("{x:.0}")
    } else {
        format!("{x:.1}")
    }
}

/// A value past its limit, with as many decimals as it takes to read as past it: an alarm
/// raised at 20.02 min against a 20 min limit reads `20.02`, never `20.0 > 20`. (An alarm
/// is raised only strictly past its limit, so some number of decimals always shows it.)
fn past(v: f64, limit: f64, high: bool) -> String {
    let beyond = |text: &str| {
        text.parse::<f64>()
            .is_ok_and(|x| if high { x > limit } else { x < limit })
    };
    let text = num(v);
    if beyond(&text) {
        return text;
    }
    (1..=6)
        .map(|d| format!("{v:.d$}"))
        .find(|t| beyond(t))
        .unwrap_or(text)
}

/// A configured figure: at most three decimals, no trailing zeros (`20`, `0.208`).
fn short(x: f64) -> String {
    let s = format!("{x:.3}");
    let s = s.trim_end_matches('0').trim_end_matches('.');
    if s.is_empty() || s == "-" {
        "0".into()
    } else {
        s.to_string()
    }
}

fn with_unit(n: String, unit: &str) -> String {
    if unit.is_empty() {
        n
    } else {
        format!("{n} {unit}")
    }
}

/// `+42 min` of plant time since the start of the demo.
fn plant_minutes(t_ms: i64, start_ms: i64) -> String {
    format!("+{:.0} min", (t_ms - start_ms) as f64 / MINUTE_MS as f64)
}

/// A span of plant time ahead: `in 40 min`, `in 5.2 h`, `in 2.1 d`.
fn ahead(ms: i64) -> String {
    if ms <= 0 {
        "now".into()
    } else if ms < 2 * HOUR_MS {
        format!("in {} min", ms / MINUTE_MS)
    } else if ms < 2 * DAY_MS {
        format!("in {:.1} h", ms as f64 / HOUR_MS as f64)
    } else if ms < 1000 * DAY_MS {
        format!("in {:.1} d", ms as f64 / DAY_MS as f64)
    } else {
        ">1000 d".into()
    }
}

/// The trend cell: K/d, `learning` while the baseline is learned, `-` before a trend.
fn trend_cell(drift: Option<&Value>) -> String {
    let Some(d) = drift else {
        return "-".into();
    };
    if d["baseline"] == "learning" {
        return "learning".into();
    }
    d["trend_k_per_day"].as_f64().map_or("-".into(), |x| {
        if x.abs() >= 1000.0 {
            format!("{x:+.0}")
        } else {
            format!("{x:+.1}")
        }
    })
}

/// The end-of-run cell, counted from `now_ms` (plant time).
fn end_of_run_cell(drift: Option<&Value>, now_ms: i64) -> String {
    let Some(e) = drift.map(|d| &d["end_of_run"]) else {
        return "-".into();
    };
    match e["state"].as_str() {
        // A forecast whose late bound is "never" (the slope interval reaches zero) has no
        // date worth reading as one.
        Some("forecast") if e["latest"].is_null() => "not sure".into(),
        Some("forecast") => e["date"]
            .as_str()
            .and_then(parse_rfc3339)
            .map_or("-".into(), |at| ahead(at - now_ms)),
        Some("reached") => "reached".into(),
        Some("not-rising") => "not rising".into(),
        _ => "-".into(),
    }
}

/// What is annunciating on a reactor, from its retained `eqwatch.alarms/1` state:
/// operator alarms one by one with their state, then the engineering alerts.
///
/// An operator alarm that returned to normal stays until acknowledged (it needs the
/// operator: `cleared, unack`). An engineering alert that cleared needs nobody's
/// acknowledgement, so it leaves the column (its `cleared` event stays in the lines
/// below the table).
fn flags(states: &Value) -> Vec<String> {
    let mut out = Vec::new();
    if states["offline"] == true {
        out.push("unit OFF LINE".into());
    }
    let mut alerts = Vec::new();
    for a in states["alarms"]
        .as_array()
        .map_or(&[][..], |a| a.as_slice())
    {
        let Some(id) = a["alarm"].as_str() else {
            continue;
        };
        let state = a["state"].as_str().unwrap_or("");
        let mode = a["mode"].as_str().unwrap_or("");
        let short = match state {
            "unacknowledged" => "unack",
            "acknowledged" => "ack",
            "returned-to-normal unacknowledged" => "cleared, unack",
            s => s,
        };
        match (a["class"].as_str(), a["annunciating"] == true) {
            (Some("alarm"), true) => out.push(format!("ALARM {id} ({short})")),
            // Shelved, suppressed by design or out of service while its condition is on.
            (Some("alarm"), false) if a["condition"] == true && mode != "active" => {
                out.push(format!("ALARM {id} ({mode})"));
            }
            (Some("alert"), true) if a["condition"] == true => alerts.push(id.to_string()),
            _ => {}
        }
    }
    if !alerts.is_empty() {
        out.push(format!("alert {}", alerts.join(", ")));
    }
    out
}

/// Greedy wrap of `items` (joined by "; ") into lines of at most `width` characters.
fn wrap(items: &[String], width: usize) -> Vec<String> {
    let mut lines: Vec<String> = Vec::new();
    let mut cur = String::new();
    for it in items {
        let sep = if cur.is_empty() { "" } else { "; " };
        if !cur.is_empty() && cur.chars().count() + sep.len() + it.chars().count() > width {
            lines.push(std::mem::take(&mut cur));
            cur.push_str(it);
        } else {
            cur.push_str(sep);
            cur.push_str(it);
        }
    }
    if !cur.is_empty() {
        lines.push(cur);
    }
    lines
}

/// Under the column headings: what the sign of the approach means.
const APPROACH_LEGEND: &str = "approach K > 0: short of equilibrium by that much; < 0: beyond it (flagged: check the instruments)";

struct View<'a> {
    ids: &'a [String],
    start_ms: i64,
    now_ms: i64,
    link_up: bool,
    /// Event lines under the table (terminal).
    recent: usize,
    /// The last line (where the log is), if any.
    footer: Option<&'a str>,
}

fn table(seen: &Seen, view: &View) -> String {
    let mut s = String::new();
    s.push_str(&format!(
        "Brackwater Ammonia Works, train 1 (simulated)  plant time {:>8}  broker link {}\n",
        plant_minutes(view.now_ms, view.start_ms),
        if view.link_up {
            "up"
        } else {
            "DOWN (drop-out)"
        }
    ));
    s.push_str(&format!(
        "{:<5} {:>10} {:>5} {:>6} {:<9} {:>9} {:>10}  {}\n",
        "unit",
        "approach K",
        "± K",
        "T degC",
        "quality",
        "trend K/d",
        "end of run",
        "alarms and alerts annunciating"
    ));
    s.push_str(APPROACH_LEGEND);
    s.push('\n');
    let indent = " ".repeat(FLAGS_COLUMN);
    for id in view.ids {
        let Some(u) = seen.reactors.get(id) else {
            s.push_str(&format!("{id:<5} {:>10}\n", "waiting"));
            continue;
        };
        let states = u.states.as_ref().map(|(_, v)| flags(v)).unwrap_or_default();
        let flag_lines = wrap(&states, TABLE_WIDTH - FLAGS_COLUMN);
        let Some((_, v)) = &u.latest else {
            s.push_str(&format!(
                "{id:<5} {:>10}{}{}\n",
                "waiting",
                " ".repeat(FLAGS_COLUMN - 16),
                flag_lines.first().map_or("-", String::as_str)
            ));
            continue;
        };
        let t_c = v["temperature_k"]
            .as_f64()
            .map_or("-".into(), |t| format!("{:.1}", t - 273.15));
        let drift = u.drift();
        // Where the approach is not meaningful (equilibrium below the analyser's detection
        // limit) the key component's measured slip stands in its column.
        let slip = (v["headline"]["figure"] == "key-measured").then(|| {
            format!(
                "{} {}",
                v["headline"]["value"]
                    .as_f64()
                    .map_or("-".into(), |x| crate::units::fmt_num(x, 2)),
                v["headline"]["unit"].as_str().unwrap_or("")
            )
        });
        s.push_str(&format!(
            "{id:<5} {:>10} {:>5} {:>6} {:<9} {:>9} {:>10}  {}\n",
            slip.unwrap_or_else(|| fmt_opt(&v["approach_k"], 2)),
            fmt_opt(&v["approach_uncertainty_k"], 1),
            t_c,
            v["quality"].as_str().unwrap_or("-"),
            trend_cell(drift),
            end_of_run_cell(drift, view.now_ms),
            flag_lines.first().map_or("-", String::as_str)
        ));
        for l in flag_lines.iter().skip(1) {
            s.push_str(&format!("{indent}{l}\n"));
        }
        // Why a result is not good, in words (each message once).
        let mut reasons: Vec<String> = Vec::new();
        for r in v["reasons"].as_array().into_iter().flatten() {
            if r["severity"] == "good" {
                continue;
            }
            if let Some(m) = r["message"].as_str().map(str::to_string)
                && !reasons.contains(&m)
            {
                reasons.push(m);
            }
        }
        for (i, r) in reasons.iter().take(2).enumerate() {
            let first = if i == 0 { "      why: " } else { "           " };
            for l in fill(r, first, "           ", TABLE_WIDTH) {
                s.push_str(&l);
                s.push('\n');
            }
        }
        if reasons.len() > 2 {
            s.push_str(&format!("           (and {} more)\n", reasons.len() - 2));
        }
    }
    if view.recent > 0 {
        let from = seen.events.len().saturating_sub(view.recent);
        if seen.events.is_empty() {
            s.push_str("alerts and alarms: none raised yet\n");
        } else {
            s.push_str("latest alert and alarm events (plant time):\n");
        }
        for e in &seen.events[from..] {
            for l in e.lines(view.start_ms, TABLE_WIDTH) {
                s.push_str(&l);
                s.push('\n');
            }
        }
    }
    if let Some(f) = view.footer {
        s.push_str(f);
        s.push('\n');
    }
    s
}

// ---------------------------------------------------------------------------------------------
// Plots at exit
// ---------------------------------------------------------------------------------------------

/// The trend line and its forward projection from the newest result's drift figures.
///
/// The daemon fits the trend to one mean per `aggregate_ms` bucket of the run (bucket
/// middles), and closes a bucket when an analysis of a later bucket arrives; the buckets
/// are rebuilt here from the sample times the results say were included, so the line is
/// drawn where it was fitted. If they do not add up to the published number of trend
/// points (a result missed), the line is anchored on the last point instead. The band is
/// the published ± half-width at the last trend point, drawn at that width throughout.
fn projection(u: &ReactorSeen, aggregate_ms: i64) -> Option<Projection> {
    let d = u.drift()?;
    let slope = d["trend_k_per_day"].as_f64()?;
    let fitted = d["trend_fitted_k"].as_f64()?;
    let band = d["trend_band_k"].as_f64().map_or(0.0, f64::abs);
    let n = d["trend_points"].as_u64().unwrap_or(0);
    let (first_t, last_t) = (*u.points.keys().next()?, *u.points.keys().next_back()?);
    let start = d["run_start"]
        .as_str()
        .and_then(parse_rfc3339)
        .unwrap_or(first_t);
    let period = aggregate_ms.max(1);
    let buckets: BTreeSet<i64> = u
        .included
        .range(start..)
        .map(|t| (t - start).div_euclid(period))
        .collect();
    // The newest bucket is still open.
    let closed: Vec<i64> = buckets
        .iter()
        .copied()
        .take(buckets.len().saturating_sub(1))
        .collect();
    let mid = |k: i64| start + k * period + period / 2;
    let (from, anchor) = match (closed.first(), closed.last()) {
        (Some(&a), Some(&b)) if closed.len() as u64 == n => (mid(a), mid(b)),
        _ => (start, last_t),
    };
    let forecast = d["end_of_run"]["state"] == "forecast";
    let date = |k: &str| {
        d["end_of_run"][k]
            .as_str()
            .and_then(parse_rfc3339)
            .filter(|_| forecast)
    };
    let end = date("date");
    // A short way ahead: to the end of run if it is near, else a quarter of the data span.
    let span = (last_t - first_t).max(period);
    let to = end
        .unwrap_or(last_t + span / 4)
        .clamp(last_t, last_t + span / 2);
    let steps = 24;
    let points = (0..=steps)
        .map(|i| {
            let t = from + (to - from) * i / steps;
            let y = fitted + slope * (t - anchor) as f64 / DAY_MS as f64;
            (t, y, y - band, y + band)
        })
        .collect();
    Some(Projection {
        points,
        slope_k_per_day: slope,
        end_of_run_ms: end,
        end_of_run_range_ms: date("earliest").map(|e| (e, date("latest").or(end).unwrap_or(e))),
    })
}

fn reactor_plot(seen: &Seen, settings: &Settings, r: usize, start_ms: i64) -> ReactorPlot {
    let rs = &settings.reactors[r];
    let Some(u) = seen.reactors.get(&rs.spec.id) else {
        return ReactorPlot {
            reactor: rs.spec.id.clone(),
            title: format!("{} ({})", rs.spec.name, rs.spec.id),
            key_component: settings.species.get(rs.spec.key_component).name.clone(),
            ..ReactorPlot::default()
        };
    };
    let last_t = u.points.keys().next_back().copied().unwrap_or(start_ms);
    let runs: Vec<(i64, (f64, Option<f64>))> = u.baselines.iter().map(|(k, v)| (*k, *v)).collect();
    let baselines = runs
        .iter()
        .enumerate()
        .map(|(i, &(from, (k, sigma)))| BaselineSpan {
            from_ms: from,
            to_ms: runs.get(i + 1).map_or(last_t, |n| n.0),
            approach_k: k,
            sigma_k: sigma,
        })
        .collect();
    let markers = seen
        .events
        .iter()
        .filter(|e| e.reactor == rs.spec.id)
        .filter_map(|e| {
            let kind = match e.event.as_str() {
                "raised" | "re-alarmed" if e.class == "alarm" => MarkerKind::Alarm,
                "raised" | "re-alarmed" => MarkerKind::Alert,
                "cleared" => MarkerKind::Cleared,
                "acknowledged" | "shelved" | "out-of-service" | "returned-to-service" => {
                    MarkerKind::Operator
                }
                _ => return None,
            };
            Some(Marker {
                t_ms: e.at_ms,
                kind,
                source: e.what(),
                label: format!("{} ({})", e.event, plant_minutes(e.at_ms, start_ms)),
            })
        })
        .collect();
    let alarm_limits = rs
        .spec
        .watch
        .alarms
        .iter()
        .filter(|a| a.figure == crate::monitor::watch::Figure::Approach && a.scale > 0.0)
        .map(|a| crate::plot::AlarmLimit {
            id: a.config.id.clone(),
            limit_k: a.config.limit / a.scale,
            high: a.config.direction == crate::monitor::alarm::Direction::High,
        })
        .collect();
    ReactorPlot {
        reactor: rs.spec.id.clone(),
        title: format!("{} ({})", rs.spec.name, rs.spec.id),
        key_component: u
            .key_component
            .clone()
            .unwrap_or_else(|| settings.species.get(rs.spec.key_component).name.clone()),
        limit_k: u.limit_k.or(rs.spec.watch.drift.end_of_run_limit_k),
        points: u.points.values().copied().collect(),
        baselines,
        projection: projection(u, rs.spec.watch.drift.aggregate_ms),
        markers,
        alarm_limits,
        // The console's points carry the results' key-component values as published:
        // mole fractions of the wet gas.
        key_basis: Some("wet".into()),
        ..ReactorPlot::default()
    }
}

// ---------------------------------------------------------------------------------------------
// The demo
// ---------------------------------------------------------------------------------------------

/// The demo's log file, in its folder: the live table owns the terminal.
pub const LOG_FILE: &str = "eqwatch.log";

/// The demo's folder: the journal (`var/journal`) and watch state, the log
/// ([`LOG_FILE`]) and, when the folder is kept, the plots (`plots/`).
///
/// A folder the user names (`--workdir`) must be new or empty and is kept. Otherwise the
/// demo makes a new temporary folder and removes it at the end of a run unless `--keep`;
/// plots are only written into a folder that is kept (they would vanish with it).
#[derive(Debug)]
pub struct Workdir {
    path: PathBuf,
    keep: bool,
}

impl Workdir {
    /// Makes the folder: `given` (created if missing; must be empty), or a new one in the
    /// system's temporary folder.
    pub fn prepare(given: Option<PathBuf>, keep: bool) -> Result<Self, CliError> {
        let Some(path) = given else {
            let base = std::env::temp_dir();
            let pid = std::process::id();
            for n in 0..100u32 {
                let name = if n == 0 {
                    format!("eqwatch-demo-{pid}")
                } else {
                    format!("eqwatch-demo-{pid}-{n}")
                };
                let path = base.join(name);
                match std::fs::create_dir(&path) {
                    Ok(()) => return Ok(Self { path, keep }),
                    Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists => continue,
                    Err(e) => return Err(internal("demo folder")(e)),
                }
            }
            return Err(CliError::Internal(format!(
                "no free demo folder name in {}",
                base.display()
            )));
        };
        let shown = path.display().to_string();
        if path.exists() {
            if !path.is_dir() {
                return Err(CliError::Input(format!(
                    "--workdir `{shown}` is not a folder"
                )));
            }
            let mut entries = std::fs::read_dir(&path).map_err(input("--workdir"))?;
            if entries.next().is_some() {
                return Err(CliError::Input(format!(
                    "--workdir `{shown}` is not empty: give a new or empty folder (the demo writes its journal, log and plots there)"
                )));
            }
        } else {
            std::fs::create_dir_all(&path).map_err(input("--workdir"))?;
        }
        let path = std::fs::canonicalize(&path).map_err(input("--workdir"))?;
        Ok(Self { path, keep: true })
    }

    pub fn path(&self) -> &Path {
        &self.path
    }

    pub fn log_file(&self) -> PathBuf {
        self.path.join(LOG_FILE)
    }

    /// Whether the folder stays after the run.
    pub fn kept(&self) -> bool {
        self.keep
    }

    /// Removes the folder unless it is kept; says whether it did.
    pub fn discard(&self) -> std::io::Result<bool> {
        if self.keep {
            return Ok(false);
        }
        std::fs::remove_dir_all(&self.path).map(|()| true)
    }

    /// The start-up line that names the folder and what becomes of it.
    fn start_line(&self) -> String {
        let fate = if self.keep {
            "kept at exit, with SVG plots of the run in plots/"
        } else {
            "removed at exit; --keep or --workdir DIR keeps it, with SVG plots of the run"
        };
        format!(
            "demo folder {} (journal in var/journal, log in {LOG_FILE}): {fate}",
            self.path.display()
        )
    }
}

/// Runs the demo for `duration` (wall clock) at `speed` simulated seconds per second in
/// `work`, logging into [`Workdir::log_file`] (the caller set the log up); at the end the
/// folder is removed unless kept. After a failure it is kept, for its log.
pub async fn run(
    speed: f64,
    duration: &str,
    broker: Option<String>,
    page: Option<std::net::SocketAddr>,
    work: Workdir,
) -> Result<(), CliError> {
    match live(speed, duration, broker, page, &work).await {
        Ok(()) => {
            if work.kept() {
                println!(
                    "demo folder kept: {} ({LOG_FILE}, plots/, var/journal)",
                    work.path().display()
                );
            } else {
                match work.discard() {
                    Ok(_) => println!(
                        "demo folder {} removed (journal and log; no plots written): --keep or --workdir DIR keeps it, with SVG plots of the run",
                        work.path().display()
                    ),
                    Err(e) => println!(
                        "demo folder {} could not be removed: {e}",
                        work.path().display()
                    ),
                }
            }
            println!("advisory figures only: not a safety function.");
            Ok(())
        }
        // Bad options: the run did not start, nothing in the folder is worth keeping.
        Err(e @ CliError::Input(_)) => {
            let _ = work.discard();
            Err(e)
        }
        Err(CliError::Internal(m)) => Err(CliError::Internal(format!(
            "{m} (the demo folder is kept for its log: {})",
            work.log_file().display()
        ))),
    }
}

async fn live(
    speed: f64,
    duration: &str,
    broker: Option<String>,
    page: Option<std::net::SocketAddr>,
    work: &Workdir,
) -> Result<(), CliError> {
    if !(speed.is_finite() && speed > 0.0 && speed <= 3600.0) {
        return Err(CliError::Input(
            "--speed must be above 0 and at most 3600 (simulated seconds per second)".into(),
        ));
    }
    let duration = crate::config::parse_duration(duration).map_err(input("--duration"))?;
    let mut settings = crate::config::from_str(DEMO_CONFIG, work.path())
        .map_err(|e| CliError::Internal(format!("demo configuration: {e}")))?;
    settings.http_listen = page;
    let compressed = compress_watch(&mut settings);
    let upstream = Upstream::start(broker.as_deref())?;
    let proxy = DropoutProxy::start(0, upstream.addr)
        .await
        .map_err(internal("drop-out proxy"))?;
    settings.broker.host = "127.0.0.1".into();
    settings.broker.port = proxy.port();
    settings.broker.tls = false;
    settings.broker.reconnect_max = Duration::from_secs(2);
    let prefix = settings.topic_prefix.clone();
    let ids: Vec<String> = settings
        .reactors
        .iter()
        .map(|r| r.spec.id.clone())
        .collect();
    print_banner(&upstream, proxy.port(), speed, duration, work, &compressed);

    // Compressed plant time drives the daemon's clock too, so ages and lags are in plant time.
    let start_wall = Instant::now();
    let start_ms = now_ms();
    let clock: Clock =
        Arc::new(move || start_ms + (start_wall.elapsed().as_secs_f64() * speed * 1000.0) as i64);
    let cancel = CancellationToken::new();
    let settings = Arc::new(settings);
    let daemon = tokio::spawn(crate::daemon::run(
        settings.clone(),
        cancel.clone(),
        clock.clone(),
        crate::daemon::Control::none(),
    ));
    let sim_client = plant_client(upstream.addr);
    let seen = console(upstream.addr, &prefix);
    let interrupted = interrupt_token();

    let mut run = Run {
        plant: Plant::new(20_261_201, start_ms),
        sim_client,
        proxy: &proxy,
        speed,
        // One broker drop-out of about 4 simulated minutes (between 1 and 8 s of wall
        // time), early enough that several analyses follow it.
        dropout: (
            duration.as_secs_f64() * 0.4,
            (240.0 / speed).clamp(1.0, 8.0),
        ),
        link_up: true,
        last_sim_s: 0.0,
    };
    let mut screen = Screen::new(std::io::stdout().is_terminal());
    let footer = fill(
        &format!("log: {}", work.log_file().display()),
        "",
        "  ",
        TABLE_WIDTH,
    )
    .join("\n");
    let mut tick = tokio::time::interval(Duration::from_millis(100));
    while start_wall.elapsed() < duration && !interrupted.is_cancelled() {
        tick.tick().await;
        let notes = run.step(start_wall.elapsed().as_secs_f64()).await;
        let view = View {
            ids: &ids,
            start_ms,
            now_ms: clock(),
            link_up: run.link_up,
            recent: if screen.tty { RECENT_EVENTS } else { 0 },
            footer: screen.tty.then_some(footer.as_str()),
        };
        screen.draw(notes, &lock(&seen), &view);
    }
    proxy.set_up(true);
    if interrupted.is_cancelled() {
        println!("interrupted: ending the run early");
    }
    println!("stopping the daemon (delivering what is journaled, then offline) ...");
    cancel.cancel();
    match tokio::time::timeout(Duration::from_secs(30), daemon).await {
        Ok(Ok(Ok(()))) => {}
        Ok(Ok(Err(e))) => return Err(CliError::Internal(format!("daemon: {e}"))),
        Ok(Err(e)) => return Err(CliError::Internal(format!("daemon task: {e}"))),
        Err(_) => return Err(CliError::Internal("daemon did not stop within 30 s".into())),
    }
    tokio::time::sleep(Duration::from_millis(300)).await;
    let end_ms = clock();
    let plots = {
        let seen = lock(&seen);
        print!("{}", screen.closing(&seen, &ids, start_ms, end_ms));
        (0..settings.reactors.len())
            .map(|r| reactor_plot(&seen, &settings, r, start_ms))
            .collect()
    };
    write_demo_plots(work, plots).await?;
    println!(
        "retained results stay on {prefix}/<reactor>/result; status on {prefix}/status (offline now)."
    );
    println!("alert and alarm states stay on {prefix}/<reactor>/alarms (retained).");
    Ok(())
}

/// The broker the demo talks to: the embedded one, or one given with `--broker`.
struct Upstream {
    addr: SocketAddr,
    given: bool,
    /// Kept alive for the run.
    #[cfg(feature = "demo-broker")]
    _embedded: Option<super::broker::EmbeddedBroker>,
}

impl Upstream {
    fn start(url: Option<&str>) -> Result<Self, CliError> {
        if let Some(url) = url {
            return Ok(Self {
                addr: broker_addr(url)?,
                given: true,
                #[cfg(feature = "demo-broker")]
                _embedded: None,
            });
        }
        #[cfg(feature = "demo-broker")]
        {
            let b = super::broker::start_embedded_broker(super::broker::free_port())
                .map_err(internal("embedded broker"))?;
            Ok(Self {
                addr: b.addr(),
                given: false,
                _embedded: Some(b),
            })
        }
        #[cfg(not(feature = "demo-broker"))]
        {
            Err(CliError::Input("this build has no embedded broker (feature demo-broker); give --broker mqtt://host:port".into()))
        }
    }
}

/// What the demo is, where it works and logs, and the advisory notice.
fn print_banner(
    upstream: &Upstream,
    proxy_port: u16,
    speed: f64,
    duration: Duration,
    work: &Workdir,
    compressed: &str,
) {
    println!("{}", super::sim::SCENARIO);
    println!(
        "broker {} ({}), daemon through a drop-out proxy on 127.0.0.1:{proxy_port}, speed x{speed}, {} s",
        upstream.addr,
        if upstream.given { "given" } else { "embedded" },
        duration.as_secs(),
    );
    println!("{}", work.start_line());
    println!(
        "log: {} (the daemon's log goes there: the live table owns the terminal)",
        work.log_file().display()
    );
    println!("{compressed}");
    for l in fill(crate::daemon::ADVISORY, "", "  ", TABLE_WIDTH) {
        println!("{l}");
    }
}

fn client_options(name: &str, upstream: SocketAddr) -> MqttOptions {
    let mut o = MqttOptions::new(
        format!("{name}-{}", std::process::id()),
        upstream.ip().to_string(),
        upstream.port(),
    );
    o.set_keep_alive(Duration::from_secs(10));
    o.set_max_packet_size(1 << 20, 1 << 20);
    o
}

/// The simulated plant's client: it publishes straight to the broker.
fn plant_client(upstream: SocketAddr) -> AsyncClient {
    let (client, mut ev) = AsyncClient::new(client_options("baw1-plant-sim", upstream), 1024);
    tokio::spawn(async move {
        loop {
            if ev.poll().await.is_err() {
                tokio::time::sleep(Duration::from_millis(200)).await;
            }
        }
    });
    client
}

/// The console's client: what the table shows comes from these subscriptions only.
fn console(upstream: SocketAddr, prefix: &str) -> Shared {
    let seen: Shared = Arc::new(Mutex::new(Seen::default()));
    listen(
        AsyncClient::new(client_options("baw1-demo-console", upstream), 64),
        vec![
            format!("{prefix}/+/result"),
            format!("{prefix}/+/alarms"),
            format!("{prefix}/+/alert"),
            format!("{prefix}/+/alarm"),
            format!("{prefix}/alert"),
        ],
        seen.clone(),
    );
    seen
}

/// Ctrl-C ends the run early (summary, plots, clean-up as at the end); a second one
/// leaves at once.
fn interrupt_token() -> CancellationToken {
    let interrupted = CancellationToken::new();
    let i = interrupted.clone();
    tokio::spawn(async move {
        if tokio::signal::ctrl_c().await.is_ok() {
            i.cancel();
            if tokio::signal::ctrl_c().await.is_ok() {
                std::process::exit(130);
            }
        }
    });
    interrupted
}

/// The simulated plant and the drop-out, stepped with wall time.
struct Run<'a> {
    plant: Plant,
    sim_client: AsyncClient,
    proxy: &'a DropoutProxy,
    speed: f64,
    /// Start and length of the drop-out, wall seconds.
    dropout: (f64, f64),
    link_up: bool,
    last_sim_s: f64,
}

impl Run<'_> {
    /// Publishes what the instruments report up to now, cuts or restores the link;
    /// returns the lines to print (plant events, link changes).
    async fn step(&mut self, wall_s: f64) -> Vec<String> {
        let sim_s = wall_s * self.speed;
        for m in self.plant.step(sim_s) {
            let _ = self
                .sim_client
                .publish(m.topic, QoS::AtLeastOnce, m.retain, m.payload)
                .await;
        }
        let mut notes: Vec<String> = self
            .plant
            .events_between(self.last_sim_s, sim_s)
            .into_iter()
            .map(|e| {
                format!(
                    "  * +{:.0} min {}: {}",
                    e.at_s / 60.0,
                    e.reactor,
                    e.description
                )
            })
            .collect();
        self.last_sim_s = sim_s;
        let (from, length) = self.dropout;
        let want_up = !(wall_s >= from && wall_s < from + length);
        if want_up != self.link_up {
            self.proxy.set_up(want_up);
            self.link_up = want_up;
            notes.push(if want_up {
                "  * broker link restored: the daemon reconnects and sends what it journaled meanwhile (marked late)".into()
            } else {
                format!("  * broker link cut for {length:.0} s (simulated drop-out): results keep being computed and journaled")
            });
        }
        notes
    }
}

/// The terminal (a table redrawn in place) or a log of lines (not a terminal).
struct Screen {
    tty: bool,
    drawn_lines: usize,
    events_printed: usize,
    last_draw: Instant,
}

impl Screen {
    fn new(tty: bool) -> Self {
        Self {
            tty,
            drawn_lines: 0,
            events_printed: 0,
            last_draw: Instant::now() - Duration::from_secs(60),
        }
    }

    /// Prints the notes, then redraws the table (twice a second on a terminal, every
    /// 10 s otherwise, where every new alert or alarm event is also a line of its own).
    fn draw(&mut self, mut notes: Vec<String>, seen: &Seen, view: &View<'_>) {
        if !self.tty {
            for e in &seen.events[self.events_printed.min(seen.events.len())..] {
                notes.extend(e.lines(view.start_ms, TABLE_WIDTH));
            }
            self.events_printed = seen.events.len();
        }
        let redraw = if self.tty {
            self.last_draw.elapsed() >= Duration::from_millis(500)
        } else {
            self.last_draw.elapsed() >= Duration::from_secs(10)
        };
        if notes.is_empty() && !redraw {
            return;
        }
        let mut out = std::io::stdout().lock();
        if self.tty && self.drawn_lines > 0 {
            let _ = write!(out, "\x1b[{}A\x1b[J", self.drawn_lines);
        }
        for n in &notes {
            let _ = writeln!(out, "{n}");
        }
        if self.tty || redraw {
            let t = table(seen, view);
            self.drawn_lines = t.lines().count();
            let _ = write!(out, "{t}");
            self.last_draw = Instant::now();
        } else {
            self.drawn_lines = 0;
        }
        let _ = out.flush();
    }

    /// The events not printed yet (not a terminal), then the end-of-run summary.
    fn closing(&self, seen: &Seen, ids: &[String], start_ms: i64, end_ms: i64) -> String {
        let mut text = String::new();
        if !self.tty {
            for e in &seen.events[self.events_printed.min(seen.events.len())..] {
                for l in e.lines(start_ms, TABLE_WIDTH) {
                    text.push_str(&l);
                    text.push('\n');
                }
            }
        }
        text.push_str(&summary(seen, ids, start_ms, end_ms));
        text
    }
}

/// Plots only into a folder that stays (they would vanish with a temporary one);
/// rendering and writing files is blocking work, off the async thread.
async fn write_demo_plots(work: &Workdir, plots: Vec<ReactorPlot>) -> Result<(), CliError> {
    if !work.kept() {
        return Ok(());
    }
    let plot_dir: PathBuf = work.path().join("plots");
    let dir = plot_dir.clone();
    let written = tokio::task::spawn_blocking(move || {
        crate::replay::write_svgs(
            &dir,
            &plots,
            "Brackwater Ammonia Works, train 1 (simulated): demo run in compressed time",
            crate::plot::TimeZone::UTC,
        )
    })
    .await
    .map_err(internal("plot task"))?
    .map_err(|e| CliError::Internal(format!("plots in {}: {e}", plot_dir.display())))?;
    let names: Vec<String> = written
        .iter()
        .filter_map(|p| p.file_name())
        .map(|n| n.to_string_lossy().into_owned())
        .collect();
    println!("plots: {}/ ({})", plot_dir.display(), names.join(" "));
    println!("log: {}", work.log_file().display());
    Ok(())
}

/// The end-of-run summary: results per reactor, then the alerts and alarms raised.
fn summary(seen: &Seen, ids: &[String], start_ms: i64, end_ms: i64) -> String {
    let mut s = format!(
        "\nsummary after {:.0} min of plant time:\n{:<6} {:>8} {:>12} {:<10}\n",
        (end_ms - start_ms) as f64 / MINUTE_MS as f64,
        "unit",
        "results",
        "approach K",
        "quality"
    );
    for id in ids {
        match seen
            .reactors
            .get(id)
            .and_then(|u| u.latest.as_ref().map(|l| (u, &l.1)))
        {
            Some((u, v)) => s.push_str(&format!(
                "{id:<6} {:>8} {:>12} {:<10}\n",
                u.results,
                fmt_opt(&v["approach_k"], 2),
                v["quality"].as_str().unwrap_or("-")
            )),
            None => s.push_str(&format!(
                "{id:<6} {:>8} {:>12} {:<10}\n",
                0, "-", "no result"
            )),
        }
    }
    s.push_str("alerts and alarms raised (plant time):\n");
    let mut any = false;
    let plant = ["plant".to_string()];
    for id in ids.iter().chain(plant.iter()) {
        // (class, alarm) -> minutes raised, in the order first raised.
        let mut raised: Vec<(&SeenEvent, Vec<String>)> = Vec::new();
        let mut evs: Vec<&SeenEvent> = seen
            .events
            .iter()
            .filter(|e| &e.reactor == id && e.raised())
            .collect();
        evs.sort_by_key(|e| e.at_ms);
        for e in evs {
            let m = plant_minutes(e.at_ms, start_ms);
            match raised
                .iter_mut()
                .find(|(f, _)| f.class == e.class && f.alarm == e.alarm)
            {
                Some((_, v)) => v.push(m),
                None => raised.push((e, vec![m])),
            }
        }
        if raised.is_empty() {
            if id != "plant" {
                s.push_str(&format!("  {id:<6} none\n"));
            }
            continue;
        }
        any = true;
        let items: Vec<String> = raised
            .iter()
            .map(|(e, at)| format!("{} {}", e.what(), at.join(", ")))
            .collect();
        s.push_str(&format!("  {id:<6} {}\n", items.join("; ")));
    }
    if !any {
        s.push_str("  (none raised in this run)\n");
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde_json::json;

    fn demo_settings() -> Settings {
        let dir = std::env::temp_dir();
        crate::config::from_str(DEMO_CONFIG, &dir).expect("the demo configuration loads")
    }

    #[test]
    fn compression_shortens_every_window_and_keeps_the_alarms() {
        let mut s = demo_settings();
        let before: Vec<_> = s
            .reactors
            .iter()
            .map(|r| r.spec.watch.alarms.clone())
            .collect();
        let line = compress_watch(&mut s);
        assert!(line.contains("compressed for the demo"), "{line}");
        for (r, alarms) in s.reactors.iter().zip(before) {
            let d = &r.spec.watch.drift;
            assert_eq!(d.aggregate_ms, DEMO_AGGREGATE_MS, "{}", r.spec.id);
            assert_eq!(d.min_aggregates, DEMO_MIN_AGGREGATES, "{}", r.spec.id);
            assert_eq!(d.trend_window_ms, None, "{}", r.spec.id);
            if let BaselineSpec::Learn { window_ms, .. } = d.baseline {
                assert_eq!(window_ms, DEMO_BASELINE_WINDOW_MS, "{}", r.spec.id);
            }
            assert_eq!(
                r.spec.watch.alarms, alarms,
                "{}: alarms untouched",
                r.spec.id
            );
        }
        let lts = s
            .reactors
            .iter()
            .find(|r| r.spec.id == "lts1")
            .expect("lts1");
        assert_eq!(lts.spec.watch.alerts.end_of_run_within_days, Some(3.0));
        // ref1's operator alarm: above 20 K, two samples (config/demo-plant.toml).
        let ref1 = s
            .reactors
            .iter()
            .find(|r| r.spec.id == "ref1")
            .expect("ref1");
        assert_eq!(ref1.spec.watch.alarms[0].config.limit, 20.0);
        assert_eq!(ref1.spec.watch.alarms[0].config.on_delay_samples, 2);
    }

    #[test]
    fn cells_say_learning_trend_and_end_of_run() {
        assert_eq!(trend_cell(None), "-");
        assert_eq!(
            trend_cell(Some(&json!({"baseline": "learning"}))),
            "learning"
        );
        assert_eq!(
            trend_cell(Some(
                &json!({"baseline": "learned", "trend_k_per_day": null})
            )),
            "-"
        );
        assert_eq!(
            trend_cell(Some(
                &json!({"baseline": "learned", "trend_k_per_day": 4.83})
            )),
            "+4.8"
        );
        let now = parse_rfc3339("2026-12-01T00:00:00Z").expect("time");
        let eor = |date: &str, latest: Value| json!({"end_of_run": {"state": "forecast", "date": date, "latest": latest}});
        let d = eor("2026-12-03T02:24:00Z", json!("2026-12-09T00:00:00Z"));
        assert_eq!(end_of_run_cell(Some(&d), now), "in 2.1 d");
        let d = eor("2026-12-01T00:40:00Z", json!("2026-12-01T03:00:00Z"));
        assert_eq!(end_of_run_cell(Some(&d), now), "in 40 min");
        // A slope that may be zero: the date could be never.
        let d = eor("2026-12-03T02:24:00Z", Value::Null);
        assert_eq!(end_of_run_cell(Some(&d), now), "not sure");
        let d = json!({"end_of_run": {"state": "no-trend"}});
        assert_eq!(end_of_run_cell(Some(&d), now), "-");
        let d = json!({"end_of_run": {"state": "reached"}});
        assert_eq!(end_of_run_cell(Some(&d), now), "reached");
    }

    #[test]
    fn flags_list_annunciating_alarms_then_alerts() {
        let st = json!({"schema": "eqwatch.alarms/1", "reactor": "ref1", "offline": false, "alarms": [
            {"alarm": "approach-high", "class": "alarm", "state": "unacknowledged", "mode": "active", "condition": true, "annunciating": true},
            {"alarm": "trend", "class": "alert", "state": "unacknowledged", "mode": "active", "condition": true, "annunciating": true},
            {"alarm": "cusum", "class": "alert", "state": "normal", "mode": "active", "condition": false, "annunciating": false},
            {"alarm": "end-of-run", "class": "alert", "state": "returned-to-normal unacknowledged", "mode": "active", "condition": false, "annunciating": true}
        ]});
        // The end-of-run alert cleared: it needs no acknowledgement and is not shown.
        assert_eq!(
            flags(&st),
            vec![
                "ALARM approach-high (unack)".to_string(),
                "alert trend".to_string()
            ]
        );
        // An operator alarm that cleared stays until acknowledged; an alert acknowledged
        // while its condition is on stays too.
        let st = json!({"reactor": "ref1", "alarms": [
            {"alarm": "approach-high", "class": "alarm", "state": "returned-to-normal unacknowledged", "mode": "active", "condition": false, "annunciating": true},
            {"alarm": "cusum", "class": "alert", "state": "acknowledged", "mode": "active", "condition": true, "annunciating": true},
            {"alarm": "data-quality", "class": "alert", "state": "returned-to-normal unacknowledged", "mode": "active", "condition": false, "annunciating": true}
        ]});
        assert_eq!(
            flags(&st),
            vec![
                "ALARM approach-high (cleared, unack)".to_string(),
                "alert cusum".to_string()
            ]
        );
        // Malformed state messages give nothing rather than a panic.
        assert!(flags(&json!({"alarms": "?"})).is_empty());
        assert!(flags(&json!(null)).is_empty());
    }

    #[test]
    fn event_lines_and_malformed_events() {
        let mut seen = Seen::default();
        let ev = json!({"schema": "eqwatch.event/1", "id": "ref1/approach-high#1@1", "reactor": "ref1",
            "class": "alarm", "alarm": "approach-high", "event": "raised", "at": "2026-12-01T00:42:00Z",
            "value": 25.08, "limit": 20.0, "direction": "high", "unit": "K"});
        seen.take("eqwatch/baw1/ref1/alarm", &ev);
        // Redelivery (same id) and junk are ignored.
        seen.take("eqwatch/baw1/ref1/alarm", &ev);
        seen.take("eqwatch/baw1/ref1/alarm", &json!({"id": 3}));
        seen.take("eqwatch/baw1/ref1/result", &json!([1, 2]));
        seen.take("eqwatch/baw1/alarms", &json!({"flood": "normal"}));
        assert_eq!(seen.events.len(), 1);
        let start = parse_rfc3339("2026-12-01T00:00:00Z").expect("time");
        assert_eq!(
            seen.events[0].line(start),
            "+42 min ref1 ALARM approach-high raised (25.1 K > 20 K)"
        );
        // No rationale in the payload: one line.
        assert_eq!(
            seen.events[0].lines(start, 100),
            vec!["  ! +42 min ref1 ALARM approach-high raised (25.1 K > 20 K)".to_string()]
        );
    }

    #[test]
    fn a_value_just_past_its_limit_never_reads_as_equal_to_it() {
        // Strictly past the limit is when the state machine raises (common practice:
        // ISA-18.2 alarm setpoints), so the figure shown must be past it too.
        assert_eq!(past(20.02, 20.0, true), "20.02");
        assert_eq!(past(20.0004, 20.0, true), "20.0004");
        assert_eq!(past(25.06, 20.0, true), "25.1");
        assert_eq!(past(0.1998, 0.2, false), "0.1998");
        assert_eq!(past(150.4, 150.0, true), "150.4");
    }

    #[test]
    fn an_operator_alarm_shows_its_rationale_where_it_is_raised() {
        // The rationale of ref1's approach-high in config/demo-plant.toml.
        let rationale = "Methane slip far above design: reformer catalyst poisoned (sulphur slip from the desulphuriser) or tubes overheating. Operator: check desulphuriser outlet sulphur, tube-wall temperatures, and reduce firing or rate per procedure.";
        let mut seen = Seen::default();
        let ev = |id: &str, class: &str, event: &str, description: &str| {
            json!({"id": id, "reactor": "ref1", "class": class, "alarm": "approach-high",
                "event": event, "at": "2026-12-01T00:42:00Z", "value": 25.08, "limit": 20.0,
                "direction": "high", "unit": "K", "description": description})
        };
        seen.take("p/ref1/alarm", &ev("a#1@1", "alarm", "raised", rationale));
        seen.take("p/ref1/alarm", &ev("a#2@2", "alarm", "cleared", rationale));
        seen.take(
            "p/ref1/alert",
            &ev(
                "a#3@3",
                "alert",
                "raised",
                "approach rising faster than 0.5 K/d",
            ),
        );
        let start = parse_rfc3339("2026-12-01T00:00:00Z").expect("time");
        let lines = seen.events[0].lines(start, 100);
        assert_eq!(
            lines[0],
            "  ! +42 min ref1 ALARM approach-high raised (25.1 K > 20 K)"
        );
        assert!(
            lines[1].starts_with("      rationale: Methane slip"),
            "{lines:?}"
        );
        assert!(lines.iter().all(|l| l.chars().count() <= 100), "{lines:?}");
        let words: Vec<&str> = lines[1..]
            .iter()
            .flat_map(|l| l.split_whitespace())
            .skip(1)
            .collect();
        assert_eq!(words.join(" "), rationale, "every word, in order");
        // Cleared, and engineering alerts: no rationale lines.
        assert_eq!(seen.events[1].lines(start, 100).len(), 1);
        assert_eq!(seen.events[2].lines(start, 100).len(), 1);
    }

    #[test]
    fn fill_keeps_words_and_cuts_only_overlong_ones() {
        let lines = fill("aa bbb cc dddd", "> ", "  ", 8);
        assert_eq!(lines, vec!["> aa bbb", "  cc", "  dddd"]);
        let lines = fill("abcdefghij", "> ", "  ", 6);
        assert_eq!(lines, vec!["> abcd", "  efgh", "  ij"]);
        assert!(fill("", "> ", "  ", 6).is_empty());
    }

    #[test]
    fn the_table_says_what_a_positive_approach_means_and_where_the_log_is() {
        let seen = Seen::default();
        let ids = vec!["ref1".to_string()];
        let view = View {
            ids: &ids,
            start_ms: 0,
            now_ms: 0,
            link_up: true,
            recent: 6,
            footer: Some("log: /tmp/x/eqwatch.log"),
        };
        let t = table(&seen, &view);
        let lines: Vec<&str> = t.lines().collect();
        assert!(lines[1].starts_with("unit "), "{t}");
        assert!(lines[2].contains("> 0: short of equilibrium"), "{t}");
        assert_eq!(lines.last(), Some(&"log: /tmp/x/eqwatch.log"), "{t}");
        assert!(
            lines.iter().all(|l| l.chars().count() <= TABLE_WIDTH),
            "{t}"
        );
    }

    #[test]
    fn a_given_work_folder_must_be_empty_and_is_kept() {
        let dir = tempfile::tempdir().expect("temp dir");
        let w = Workdir::prepare(Some(dir.path().join("new")), false).expect("a new folder");
        assert!(w.kept() && w.path().is_dir());
        assert_eq!(
            w.discard().ok(),
            Some(false),
            "a given folder is not removed"
        );
        std::fs::write(w.path().join("x"), "x").expect("write");
        let e = Workdir::prepare(Some(w.path().to_path_buf()), false).expect_err("not empty");
        assert!(e.to_string().contains("not empty"), "{e}");
        // A temporary folder is removed unless kept.
        let t = Workdir::prepare(None, false).expect("a temporary folder");
        assert!(!t.kept() && t.path().is_dir());
        assert_eq!(t.discard().ok(), Some(true));
        assert!(!t.path().exists());
    }

    #[test]
    fn trend_line_is_drawn_where_it_was_fitted() {
        // Analyses every 5 min from t = 0 (as src/demo/sim.rs), all included: buckets 0..=7
        // are closed (8 trend points), bucket 8 is open.
        let mut u = ReactorSeen::default();
        for i in 0..=8 {
            let t = i * 5 * MINUTE_MS;
            u.included.insert(t);
            u.points.insert(
                t,
                PlotPoint {
                    t_ms: t,
                    approach_k: Some(10.0),
                    ..PlotPoint::default()
                },
            );
        }
        let last = 40 * MINUTE_MS;
        let drift = json!({"baseline": "learned", "run_start": "1970-01-01T00:00:00Z",
            "trend_k_per_day": 4.8, "trend_fitted_k": 10.1, "trend_band_k": 0.5, "trend_points": 8,
            "end_of_run": {"state": "forecast", "date": "1970-01-03T00:00:00Z",
                "earliest": "1970-01-02T00:00:00Z", "limit_k": 20.0}});
        u.latest = Some((last, json!({"drift": drift})));
        let p = projection(&u, 5 * MINUTE_MS).expect("a projection");
        let (t0, y0, lo0, hi0) = p.points[0];
        assert_eq!(t0, 150_000, "first bucket middle");
        let anchor = 37 * MINUTE_MS + 30_000;
        let at = |t: i64| 10.1 + 4.8 * (t - anchor) as f64 / DAY_MS as f64;
        assert!((y0 - at(t0)).abs() < 1e-9);
        assert!((hi0 - lo0 - 1.0).abs() < 1e-9);
        // Forward at most half the data span past the last point.
        let (t1, y1, _, _) = p.points[p.points.len() - 1];
        assert_eq!(t1, last + 20 * MINUTE_MS);
        assert!((y1 - at(t1)).abs() < 1e-9);
        assert_eq!(p.end_of_run_ms, Some(2 * DAY_MS));
        assert_eq!(p.end_of_run_range_ms, Some((DAY_MS, 2 * DAY_MS)));
        // A result missed: the count no longer matches, the line hangs on the last point.
        u.included.remove(&(10 * MINUTE_MS));
        let p = projection(&u, 5 * MINUTE_MS).expect("a projection");
        let at_last = p
            .points
            .iter()
            .find(|q| q.0 == last)
            .expect("a point at the last analysis");
        assert!((at_last.1 - 10.1).abs() < 1e-9, "{at_last:?}");
        assert_eq!(p.points[0].0, 0, "from the run start");
        // No trend yet: no projection.
        u.latest = Some((
            last,
            json!({"drift": {"baseline": "learning", "trend_k_per_day": null}}),
        ));
        assert!(projection(&u, 5 * MINUTE_MS).is_none());
    }

    #[test]
    fn wrap_keeps_lines_within_the_width() {
        let items: Vec<String> = [
            "ALARM approach-high (unack)",
            "alert trend, end-of-run, cusum",
        ]
        .iter()
        .map(|s| s.to_string())
        .collect();
        let lines = wrap(&items, 38);
        assert_eq!(lines.len(), 2);
        assert!(lines.iter().all(|l| l.chars().count() <= 38));
        assert_eq!(wrap(&items, 100).len(), 1);
    }
}
