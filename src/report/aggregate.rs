//! Per-reactor, per-day aggregates of the records a period's report is made of. One
//! record at a time goes in ([`Aggregator::add_line`]); what is kept grows with the days
//! and the events, never with the results (a year of results is a few hundred days).

use std::collections::BTreeMap;

use serde_json::Value;
use thiserror::Error;

use crate::timefmt::parse_rfc3339;
use crate::units::DAY_MS;

const RESULT_SCHEMA: &str = "eqwatch.result/1";
const EVENT_SCHEMA: &str = "eqwatch.event/1";
/// Events kept per reactor (and plant-wide); the rest are counted.
pub(crate) const EVENTS_KEPT: usize = 1000;
/// Malformed lines quoted in the report; the rest are counted.
const PROBLEMS_KEPT: usize = 10;
/// A day counts as full when its results reach within this of both its ends.
const FULL_DAY_SLACK_MS: i64 = 3_600_000;

/// Why one line of the input was skipped.
#[derive(Debug, Error, Clone, PartialEq)]
pub(crate) enum LineError {
    #[error("not a JSON object: {0}")]
    NotJson(String),
    #[error("not a record: no {0}")]
    NotRecord(&'static str),
    #[error("a {schema} record without a usable {field}")]
    MissingField {
        schema: &'static str,
        field: &'static str,
    },
}

/// A reactor the report covers, as configured.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct ReactorInfo {
    pub(crate) id: String,
    pub(crate) name: String,
}

/// A day of the report: its start (epoch ms) and aggregates.
pub(crate) type Day<'a> = (i64, &'a DayAgg);

/// Running mean.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub(crate) struct Mean {
    pub(crate) n: u64,
    pub(crate) sum: f64,
}

impl Mean {
    fn add(&mut self, v: Option<f64>) {
        if let Some(v) = v.filter(|v| v.is_finite()) {
            self.n += 1;
            self.sum += v;
        }
    }
    pub(crate) fn mean(&self) -> Option<f64> {
        (self.n > 0).then(|| self.sum / self.n as f64)
    }
}

/// One reactor's UTC day.
#[derive(Debug, Clone, Default, PartialEq)]
pub(crate) struct DayAgg {
    pub(crate) first_ms: i64,
    pub(crate) last_ms: i64,
    /// Results by quality: good, uncertain, bad.
    pub(crate) quality: [u64; 3],
    /// Means over the good results of the day.
    pub(crate) approach_k: Mean,
    pub(crate) normalised_k: Mean,
    /// The headline figure where it is not the approach (a methanator's CO slip).
    pub(crate) headline: Mean,
    pub(crate) rise_k: Mean,
    pub(crate) wabt_k: Mean,
    pub(crate) front_depth_m: Mean,
    /// The drift trend at the day's last result (a running statistic: not averaged).
    pub(crate) trend_k_per_day: Option<f64>,
    /// Global test statistic / critical value, mean over the day's tests.
    pub(crate) test_ratio: Mean,
    pub(crate) tests: u64,
    pub(crate) tests_failed: u64,
}

/// One alert or alarm event as the report lists it.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct EventRow {
    pub(crate) at_ms: i64,
    pub(crate) reactor: String,
    pub(crate) class: String,
    pub(crate) alarm: String,
    pub(crate) event: String,
    pub(crate) state: String,
    pub(crate) value: Option<f64>,
    pub(crate) limit: Option<f64>,
    pub(crate) unit: String,
    pub(crate) id: String,
    /// Who and why, for an operator's action.
    pub(crate) note: String,
}

/// Everything kept of one reactor.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct ReactorAgg {
    pub(crate) info: ReactorInfo,
    pub(crate) days: BTreeMap<i64, DayAgg>,
    pub(crate) quality: [u64; 3],
    /// Results whose approach was withdrawn (`approach_not_meaningful`).
    pub(crate) not_meaningful: u64,
    /// The headline's figure and unit when it is not the approach.
    pub(crate) headline_other: Option<(String, String)>,
    pub(crate) last_ms: Option<i64>,
    /// From the last result: `drift.end_of_run`, `bed_profile.front_trend`.
    pub(crate) end_of_run: Option<Value>,
    pub(crate) front_trend: Option<Value>,
    pub(crate) end_of_life_depth_m: Option<f64>,
    pub(crate) trend_k_per_day: Option<f64>,
    pub(crate) trend_interval: Option<(f64, f64)>,
    pub(crate) has_normalise: bool,
    pub(crate) has_bed: bool,
    pub(crate) has_reconcile: bool,
    pub(crate) tests: u64,
    pub(crate) tests_passed: u64,
    pub(crate) reconcile_unavailable: u64,
    /// Instruments named `suspect`, with how often.
    pub(crate) suspects: BTreeMap<String, u64>,
    pub(crate) events: Vec<EventRow>,
    pub(crate) events_left_out: u64,
    /// Suppression by design (a bad analysis, the unit off line), per alert or alarm:
    /// summed up rather than listed, since a weekly analyser calibration alone makes a
    /// hundred pairs of rows a year that say nothing about the catalyst.
    pub(crate) suppressions: BTreeMap<String, Suppressions>,
}

/// One alert or alarm's suppressions by design in the period.
#[derive(Debug, Clone, Default, PartialEq)]
pub(crate) struct Suppressions {
    pub(crate) times: u64,
    /// Time suppressed, summed over the episodes that ended in the period (ms).
    pub(crate) total_ms: i64,
    pub(crate) longest_ms: i64,
    /// Still suppressed at the end of the period, since.
    pub(crate) open_since_ms: Option<i64>,
    /// Why, with how often (the event's reason).
    pub(crate) reasons: BTreeMap<String, u64>,
}

impl Suppressions {
    fn suppressed(&mut self, at_ms: i64, reason: &str) {
        self.times += 1;
        *self.reasons.entry(reason.to_string()).or_default() += 1;
        self.open_since_ms.get_or_insert(at_ms);
    }

    fn unsuppressed(&mut self, at_ms: i64) {
        if let Some(since) = self.open_since_ms.take() {
            let d = (at_ms - since).max(0);
            self.total_ms += d;
            self.longest_ms = self.longest_ms.max(d);
        }
    }
}

impl ReactorAgg {
    fn new(info: ReactorInfo) -> Self {
        Self {
            info,
            days: BTreeMap::new(),
            quality: [0; 3],
            not_meaningful: 0,
            headline_other: None,
            last_ms: None,
            end_of_run: None,
            front_trend: None,
            end_of_life_depth_m: None,
            trend_k_per_day: None,
            trend_interval: None,
            has_normalise: false,
            has_bed: false,
            has_reconcile: false,
            tests: 0,
            tests_passed: 0,
            reconcile_unavailable: 0,
            suspects: BTreeMap::new(),
            suppressions: BTreeMap::new(),
            events: Vec::new(),
            events_left_out: 0,
        }
    }

    /// The first and the last full day of the period (a day whose results reach within an
    /// hour of both its ends and that the period covers whole), or, without one, the first
    /// and the last day with results; `true` when they are full days.
    pub(crate) fn first_and_last_day(&self, period: &Period) -> Option<(Day<'_>, Day<'_>, bool)> {
        let full = |d: i64, a: &DayAgg| {
            period.from_ms.is_none_or(|f| f <= d)
                && period.to_ms.is_none_or(|t| d + DAY_MS <= t)
                && a.first_ms - d <= FULL_DAY_SLACK_MS
                && d + DAY_MS - a.last_ms <= FULL_DAY_SLACK_MS
        };
        let mut fulls = self.days.iter().filter(|(d, a)| full(**d, a));
        if let Some(first) = fulls.next() {
            let last = fulls.next_back().unwrap_or(first);
            return Some(((*first.0, first.1), (*last.0, last.1), true));
        }
        let first = self.days.iter().next()?;
        let last = self.days.iter().next_back()?;
        Some(((*first.0, first.1), (*last.0, last.1), false))
    }

    /// The most often named suspects, most first (ties by name).
    pub(crate) fn top_suspects(&self, n: usize) -> Vec<(&str, u64)> {
        let mut v: Vec<(&str, u64)> = self
            .suspects
            .iter()
            .map(|(k, c)| (k.as_str(), *c))
            .collect();
        v.sort_by(|a, b| b.1.cmp(&a.1).then(a.0.cmp(b.0)));
        v.truncate(n);
        v
    }
}

/// The time the report covers: `[from, to)`, epoch ms; `None` = open.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub(crate) struct Period {
    pub(crate) from_ms: Option<i64>,
    pub(crate) to_ms: Option<i64>,
}

impl Period {
    fn contains(&self, t: i64) -> bool {
        self.from_ms.is_none_or(|f| t >= f) && self.to_ms.is_none_or(|e| t < e)
    }
}

/// What was read, counted.
#[derive(Debug, Clone, Default, PartialEq)]
pub(crate) struct Counts {
    pub(crate) lines: u64,
    pub(crate) results: u64,
    pub(crate) events: u64,
    pub(crate) other_records: u64,
    pub(crate) outside_period: u64,
    pub(crate) other_reactors: u64,
    pub(crate) malformed: u64,
    /// The first malformed lines: (line number, why).
    pub(crate) problems: Vec<(u64, String)>,
    pub(crate) first_ms: Option<i64>,
    pub(crate) last_ms: Option<i64>,
}

/// The aggregates of a period's records, reactor by reactor.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Aggregator {
    pub(crate) period: Period,
    pub(crate) reactors: Vec<ReactorAgg>,
    /// Events of no configured reactor (the plant-wide flood alert).
    pub(crate) plant_events: Vec<EventRow>,
    pub(crate) plant_events_left_out: u64,
    pub(crate) counts: Counts,
}

fn num(v: &Value, ptr: &str) -> Option<f64> {
    v.pointer(ptr)
        .and_then(Value::as_f64)
        .filter(|x| x.is_finite())
}

fn text<'a>(v: &'a Value, key: &str) -> &'a str {
    v.get(key).and_then(Value::as_str).unwrap_or("")
}

fn day_of(t: i64) -> i64 {
    t.div_euclid(DAY_MS) * DAY_MS
}

impl Aggregator {
    /// An empty report of these reactors (in this order) over `period`.
    pub(crate) fn new(reactors: Vec<ReactorInfo>, period: Period) -> Self {
        Self {
            period,
            reactors: reactors.into_iter().map(ReactorAgg::new).collect(),
            plant_events: Vec::new(),
            plant_events_left_out: 0,
            counts: Counts::default(),
        }
    }

    /// Takes one line of the input (`line_no` counts from 1). A line that is not a record
    /// is counted, its first few kept for the report, and the reason returned.
    pub(crate) fn add_line(&mut self, line_no: u64, line: &str) -> Result<(), LineError> {
        self.counts.lines += 1;
        if line.trim().is_empty() {
            return Ok(());
        }
        let r = self.add_record(line);
        if let Err(e) = &r {
            self.counts.malformed += 1;
            if self.counts.problems.len() < PROBLEMS_KEPT {
                self.counts.problems.push((line_no, e.to_string()));
            }
        }
        r
    }

    /// A line that could not be read as text (bad UTF-8): counted as malformed.
    pub(crate) fn add_unreadable(&mut self, line_no: u64) {
        self.counts.lines += 1;
        self.counts.malformed += 1;
        if self.counts.problems.len() < PROBLEMS_KEPT {
            self.counts
                .problems
                .push((line_no, "not UTF-8 text".to_string()));
        }
    }

    fn add_record(&mut self, line: &str) -> Result<(), LineError> {
        // Only the parts this file reads are built (`record.rs`); the rest is checked and
        // skipped.
        let v = super::record::parse(line, super::record::RECORD)
            .map_err(|e| LineError::NotJson(e.to_string()))?;
        if !v.is_object() {
            return Err(LineError::NotJson("a JSON value but not an object".into()));
        }
        if !v.get("topic").is_some_and(Value::is_string) {
            return Err(LineError::NotRecord("topic"));
        }
        let Some(p) = v.get("payload").filter(|p| p.is_object()) else {
            return Err(LineError::NotRecord("payload object"));
        };
        match text(p, "schema") {
            RESULT_SCHEMA => self.add_result(p),
            EVENT_SCHEMA => self.add_event(p),
            _ => {
                self.counts.other_records += 1;
                Ok(())
            }
        }
    }

    /// Index of a reported reactor; `Err(true)` for a reactor not in the report.
    fn reactor_index(&mut self, id: &str) -> Option<usize> {
        self.reactors.iter().position(|r| r.info.id == id)
    }

    fn in_period(&mut self, t: i64) -> bool {
        if !self.period.contains(t) {
            self.counts.outside_period += 1;
            return false;
        }
        self.counts.first_ms = Some(self.counts.first_ms.map_or(t, |f| f.min(t)));
        self.counts.last_ms = Some(self.counts.last_ms.map_or(t, |l| l.max(t)));
        true
    }

    fn add_result(&mut self, p: &Value) -> Result<(), LineError> {
        let missing = |field| LineError::MissingField {
            schema: RESULT_SCHEMA,
            field,
        };
        let id = p
            .get("reactor")
            .and_then(Value::as_str)
            .ok_or(missing("reactor"))?;
        let t = p
            .get("sample_ts")
            .and_then(Value::as_str)
            .and_then(parse_rfc3339)
            .ok_or(missing("sample_ts"))?;
        let q = match text(p, "quality") {
            "good" => 0,
            "uncertain" => 1,
            "bad" => 2,
            _ => return Err(missing("quality")),
        };
        let Some(i) = self.reactor_index(id) else {
            self.counts.other_reactors += 1;
            return Ok(());
        };
        if !self.in_period(t) {
            return Ok(());
        }
        self.counts.results += 1;
        let r = &mut self.reactors[i];
        r.quality[q] += 1;
        let not_meaningful = p.get("reasons").and_then(Value::as_array).is_some_and(|a| {
            a.iter()
                .any(|x| text(x, "code") == "approach_not_meaningful")
        });
        if not_meaningful {
            r.not_meaningful += 1;
        }
        let headline = p.get("headline");
        let figure = headline.map_or("", |h| text(h, "figure"));
        let other_headline = !matches!(figure, "" | "approach" | "none");
        if other_headline {
            let unit = headline.map_or("", |h| text(h, "unit"));
            r.headline_other = Some((figure.to_string(), unit.to_string()));
        }
        let normalised = p.pointer("/drift/normalised").filter(|n| n.is_object());
        r.has_normalise |= normalised.is_some();
        let bed = p.get("bed_profile").filter(|b| b.is_object());
        r.has_bed |= bed.is_some();
        let rec = p.get("reconciliation").filter(|b| b.is_object());
        r.has_reconcile |= rec.is_some();

        let day = r.days.entry(day_of(t)).or_insert_with(|| DayAgg {
            first_ms: t,
            last_ms: t,
            ..DayAgg::default()
        });
        day.first_ms = day.first_ms.min(t);
        day.quality[q] += 1;
        if q == 0 {
            day.approach_k.add(num(p, "/approach_k"));
            day.normalised_k
                .add(num(p, "/drift/normalised/normalised_k"));
            if other_headline {
                day.headline.add(num(p, "/headline/value"));
            }
            day.rise_k.add(num(p, "/bed_profile/rise_k"));
            day.wabt_k.add(num(p, "/bed_profile/wabt_k"));
            day.front_depth_m.add(num(p, "/bed_profile/front_depth_m"));
        }
        let latest = r.last_ms.is_none_or(|l| t >= l);
        if t >= day.last_ms {
            day.last_ms = t;
            day.trend_k_per_day = num(p, "/drift/trend_k_per_day");
        }
        if let Some(rec) = rec {
            match rec.get("global_test").filter(|g| g.is_object()) {
                Some(g) => {
                    let passed = g.get("passed").and_then(Value::as_bool).unwrap_or(false);
                    day.tests += 1;
                    r.tests += 1;
                    if passed {
                        r.tests_passed += 1;
                    } else {
                        day.tests_failed += 1;
                    }
                    if let (Some(s), Some(c)) = (num(g, "/statistic"), num(g, "/critical"))
                        && c > 0.0
                    {
                        day.test_ratio.add(Some(s / c));
                    }
                }
                None => r.reconcile_unavailable += 1,
            }
            if let Some(s) = rec.get("suspect").and_then(Value::as_str) {
                match r.suspects.get_mut(s) {
                    Some(c) => *c += 1,
                    None => {
                        r.suspects.insert(s.to_string(), 1);
                    }
                }
            }
        }
        if latest {
            r.last_ms = Some(t);
            r.end_of_run = p.pointer("/drift/end_of_run").cloned();
            r.trend_k_per_day = num(p, "/drift/trend_k_per_day");
            r.trend_interval = match (
                num(p, "/drift/trend_interval_k_per_day/0"),
                num(p, "/drift/trend_interval_k_per_day/1"),
            ) {
                (Some(a), Some(b)) => Some((a, b)),
                _ => None,
            };
            if let Some(b) = bed {
                r.front_trend = b.get("front_trend").cloned();
                r.end_of_life_depth_m = num(b, "/end_of_life_depth_m");
            }
        }
        Ok(())
    }

    fn add_event(&mut self, p: &Value) -> Result<(), LineError> {
        let t = p
            .get("at")
            .and_then(Value::as_str)
            .and_then(parse_rfc3339)
            .ok_or(LineError::MissingField {
                schema: EVENT_SCHEMA,
                field: "at",
            })?;
        let reactor = text(p, "reactor");
        let index = self.reactor_index(reactor);
        if index.is_none() && !reactor.is_empty() && !reactor.starts_with("plant") {
            // A reactor of the plant that this report leaves out.
            self.counts.other_reactors += 1;
            return Ok(());
        }
        if !self.in_period(t) {
            return Ok(());
        }
        self.counts.events += 1;
        let event = text(p, "event");
        if let (Some(i), "suppressed" | "unsuppressed") = (index, event) {
            let sup = self.reactors[i]
                .suppressions
                .entry(text(p, "alarm").to_string())
                .or_default();
            if event == "suppressed" {
                sup.suppressed(t, text(p, "reason"));
            } else {
                sup.unsuppressed(t);
            }
            return Ok(());
        }
        let note = [text(p, "by"), text(p, "reason")]
            .iter()
            .filter(|s| !s.is_empty())
            .copied()
            .collect::<Vec<_>>()
            .join(": ");
        let row = EventRow {
            at_ms: t,
            reactor: reactor.to_string(),
            class: text(p, "class").to_string(),
            alarm: text(p, "alarm").to_string(),
            event: text(p, "event").to_string(),
            state: text(p, "state").to_string(),
            value: num(p, "/value"),
            limit: num(p, "/limit"),
            unit: text(p, "unit").to_string(),
            id: text(p, "id").to_string(),
            note,
        };
        let (list, left_out) = match index {
            Some(i) => {
                let r = &mut self.reactors[i];
                (&mut r.events, &mut r.events_left_out)
            }
            None => (&mut self.plant_events, &mut self.plant_events_left_out),
        };
        if list.len() < EVENTS_KEPT {
            list.push(row);
        } else {
            *left_out += 1;
        }
        Ok(())
    }

    /// Lines read and lines skipped as malformed.
    pub(crate) fn lines(&self) -> (u64, u64) {
        (self.counts.lines, self.counts.malformed)
    }

    /// Results taken into the report.
    pub(crate) fn results(&self) -> u64 {
        self.counts.results
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// 2026-09-01T00:00:00Z in epoch ms (`date -u -d @1788220800`).
    const D0: i64 = 1_788_220_800_000;

    fn ts(ms: i64) -> String {
        crate::timefmt::format_rfc3339(ms)
    }

    fn result(
        t: i64,
        quality: &str,
        approach: Option<f64>,
        suspect: Option<&str>,
        passed: bool,
    ) -> String {
        serde_json::json!({
            "topic": "eqwatch/x/r1/result", "retain": true,
            "payload": {
                "schema": "eqwatch.result/1", "reactor": "r1", "sample_ts": ts(t),
                "quality": quality, "approach_k": approach,
                "headline": {"figure": "approach", "value": approach, "unit": "K"},
                "drift": {"trend_k_per_day": 0.1, "end_of_run": {"state": "no-trend"}},
                "reconciliation": {"available": true, "suspect": suspect,
                    "global_test": {"statistic": if passed { 6.0 } else { 25.0 }, "critical": 12.5, "passed": passed}}
            }
        })
        .to_string()
    }

    fn agg() -> Aggregator {
        Aggregator::new(
            vec![ReactorInfo {
                id: "r1".into(),
                name: "Shift".into(),
            }],
            Period::default(),
        )
    }

    #[test]
    fn daily_means_first_and_last_full_day_and_suspects() {
        let mut a = agg();
        let mut n = 0;
        // Three days, a result every 30 min; day 0's approach 10 K, day 1's 11 K, day
        // 2's 12 K (one bad result at 99 K is left out of the mean: bad quality).
        for day in 0..3 {
            for half_hour in 0..48 {
                n += 1;
                let t = D0 + day * DAY_MS + half_hour * 1_800_000;
                let line = result(t, "good", Some(10.0 + day as f64), None, true);
                assert_eq!(a.add_line(n, &line), Ok(()));
            }
        }
        n += 1;
        a.add_line(
            n,
            &result(D0 + DAY_MS + 60_000, "bad", Some(99.0), None, true),
        )
        .unwrap_or_default();
        // Two failed tests naming the analyser, one the flow meter.
        for (i, s) in ["AI-300.CO", "AI-300.CO", "FI-301"].iter().enumerate() {
            n += 1;
            let t = D0 + 2 * DAY_MS + 120_000 + i as i64;
            a.add_line(n, &result(t, "good", Some(12.0), Some(s), false))
                .unwrap_or_default();
        }
        let r = &a.reactors[0];
        assert_eq!(r.quality, [147, 0, 1]);
        assert_eq!(r.days.len(), 3);
        let Some(((d_first, first), (d_last, last), full)) = r.first_and_last_day(&a.period) else {
            panic!("no days");
        };
        assert!(full);
        assert_eq!((d_first, d_last), (D0, D0 + 2 * DAY_MS));
        assert_eq!(first.approach_k.mean(), Some(10.0));
        assert_eq!(r.days[&(D0 + DAY_MS)].approach_k.mean(), Some(11.0));
        assert_eq!(last.approach_k.mean(), Some(12.0));
        assert_eq!(last.tests, 51);
        assert_eq!(last.tests_failed, 3);
        // 144 good results and the bad one passed; the three failed ones did not.
        assert_eq!(r.tests_passed, 144 + 1);
        assert_eq!(r.top_suspects(5), [("AI-300.CO", 2), ("FI-301", 1)]);
    }

    #[test]
    fn a_partial_day_is_not_full() {
        let mut a = agg();
        // Day 0 from 12:00 only, day 1 whole, day 2 until 06:00.
        let mut n = 0;
        for h in 12..(24 + 24 + 6) {
            n += 1;
            let line = result(D0 + h * 3_600_000, "good", Some(h as f64), None, true);
            a.add_line(n, &line).unwrap_or_default();
        }
        let r = &a.reactors[0];
        let Some(((d_first, _), (d_last, _), full)) = r.first_and_last_day(&a.period) else {
            panic!("no days");
        };
        assert!(full);
        assert_eq!((d_first, d_last), (D0 + DAY_MS, D0 + DAY_MS));
    }

    #[test]
    fn bad_lines_are_counted_and_named() {
        let mut a = agg();
        assert!(matches!(
            a.add_line(1, "{not json"),
            Err(LineError::NotJson(_))
        ));
        assert_eq!(
            a.add_line(2, "[1,2]"),
            Err(LineError::NotJson("a JSON value but not an object".into()))
        );
        assert_eq!(
            a.add_line(3, r#"{"payload":{}}"#),
            Err(LineError::NotRecord("topic"))
        );
        let no_time = r#"{"topic":"t","payload":{"schema":"eqwatch.result/1","reactor":"r1","quality":"good"}}"#;
        assert_eq!(
            a.add_line(4, no_time),
            Err(LineError::MissingField {
                schema: RESULT_SCHEMA,
                field: "sample_ts"
            })
        );
        assert_eq!(a.add_line(5, ""), Ok(()));
        // Another reactor's result and a metrics record are not malformed.
        let other = result(D0, "good", Some(1.0), None, true).replace("\"r1\"", "\"r9\"");
        assert_eq!(a.add_line(6, &other), Ok(()));
        assert_eq!(
            a.add_line(7, r#"{"topic":"t","payload":{"reactor":"r1"}}"#),
            Ok(())
        );
        assert_eq!(a.lines(), (7, 4));
        assert_eq!(a.counts.problems.len(), 4);
        assert_eq!(a.counts.problems[2].0, 3);
        assert_eq!((a.counts.other_reactors, a.counts.other_records), (1, 1));
    }

    #[test]
    fn the_period_leaves_out_what_is_outside_it() {
        let mut a = Aggregator::new(
            vec![ReactorInfo {
                id: "r1".into(),
                name: "Shift".into(),
            }],
            Period {
                from_ms: Some(D0 + DAY_MS),
                to_ms: Some(D0 + 2 * DAY_MS),
            },
        );
        for (n, t) in [D0, D0 + DAY_MS, D0 + 2 * DAY_MS - 1, D0 + 2 * DAY_MS]
            .iter()
            .enumerate()
        {
            a.add_line(n as u64 + 1, &result(*t, "good", Some(5.0), None, true))
                .unwrap_or_default();
        }
        assert_eq!(a.results(), 2);
        assert_eq!(a.counts.outside_period, 2);
    }
}
