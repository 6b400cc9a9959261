//! What the live page shows, kept from the records the pipeline emits: per reactor the
//! latest result and alarm states (as they came: they are read for the page's figures
//! only when a browser asks, every few seconds, not for every record), and a bounded ring
//! of recent headline figures for the trend chart (each result read for only the three
//! fields a point needs, without building the message's tree); the last few command
//! outcomes by request id. Pure: records and times in, JSON out.
//!
//! Memory: per reactor at most [`FINE_POINTS`] recent points and [`COARSE_POINTS`]
//! 15-minute means ([`POINT_BYTES`] bytes each), plus the latest result and states (a
//! few KB); [`OUTCOMES`] outcomes in all.

use std::collections::{HashMap, VecDeque};

use std::borrow::Cow;

use serde::Deserialize;
use serde_json::{Map, Value, json};

use crate::units::{HOUR_MS, MINUTE_MS};

/// Recent points per reactor (12 h of one-minute analyses).
pub const FINE_POINTS: usize = 720;
/// Coarse points per reactor: 15-minute means over 7 days.
pub const COARSE_POINTS: usize = 672;
pub const COARSE_MS: i64 = 15 * MINUTE_MS;
/// Bytes one point takes in memory.
pub const POINT_BYTES: usize = std::mem::size_of::<Point>();
/// Command outcomes kept for the page's requests to find theirs.
pub const OUTCOMES: usize = 32;

/// The chart's periods: name and length.
pub const PERIODS: [(&str, i64); 4] = [
    ("1h", HOUR_MS),
    ("8h", 8 * HOUR_MS),
    ("24h", 24 * HOUR_MS),
    ("7d", 7 * 24 * HOUR_MS),
];

/// What a headline figure is (the result's `headline.figure` and unit).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Figure {
    None,
    ApproachK,
    SlipPpm,
    SlipMolPct,
}

impl Figure {
    fn of(figure: Option<&str>, unit: Option<&str>) -> Self {
        match (figure, unit) {
            (Some("approach"), _) => Figure::ApproachK,
            (Some("key-measured"), Some("ppm")) => Figure::SlipPpm,
            (Some("key-measured"), Some("mol%")) => Figure::SlipMolPct,
            _ => Figure::None,
        }
    }

    fn unit(self) -> &'static str {
        match self {
            Figure::None => "",
            Figure::ApproachK => "K",
            Figure::SlipPpm => "ppm",
            Figure::SlipMolPct => "mol%",
        }
    }

    fn name(self) -> &'static str {
        match self {
            Figure::None => "none",
            Figure::ApproachK => "approach",
            Figure::SlipPpm | Figure::SlipMolPct => "key-measured",
        }
    }
}

/// One figure at an analysis time; NaN where the result had none (a gap on the chart).
/// 16 bytes: the time as whole seconds since 1970 (to 2106) and the milliseconds past
/// them, not an i64 that pads the point to 24.
#[derive(Debug, Clone, Copy, PartialEq)]
struct Point {
    t_s: u32,
    t_ms_part: u16,
    figure: Figure,
    value: f32,
    /// ± of an approach (K); NaN otherwise.
    u: f32,
}

impl Point {
    /// `None` for a time the point cannot hold (before 1970 or after 2106).
    fn new(t_ms: i64, figure: Figure, value: f32, u: f32) -> Option<Self> {
        Some(Point {
            t_s: u32::try_from(t_ms.div_euclid(1000)).ok()?,
            t_ms_part: u16::try_from(t_ms.rem_euclid(1000)).ok()?,
            figure,
            value,
            u,
        })
    }

    /// A result's headline figure at its analysis time; the band only around an
    /// approach (page_result leaves it out otherwise).
    fn of(t_ms: i64, figure: Figure, value: Option<f64>, approach_u: Option<f64>) -> Option<Self> {
        let num = |x: Option<f64>| x.map_or(f32::NAN, |x| x as f32);
        let u = if figure == Figure::ApproachK {
            num(approach_u)
        } else {
            f32::NAN
        };
        Point::new(t_ms, figure, num(value), u)
    }

    fn t_ms(&self) -> i64 {
        i64::from(self.t_s) * 1000 + i64::from(self.t_ms_part)
    }
}

/// The 15-minute mean being formed.
#[derive(Debug, Clone, Copy)]
struct Bucket {
    start_ms: i64,
    figure: Figure,
    sum: f64,
    sum_u: f64,
    n: u32,
    n_u: u32,
}

#[derive(Debug, Default)]
struct ReactorLive {
    id: String,
    name: String,
    /// The latest result and alarm states as published (JSON text).
    result: Option<String>,
    alarms: Option<String>,
    received_ms: Option<i64>,
    fine: VecDeque<Point>,
    coarse: VecDeque<Point>,
    bucket: Option<Bucket>,
}

impl ReactorLive {
    fn push(&mut self, p: Point) {
        // Out of order (a replayed record): the figures stand, the chart keeps its order.
        if self.fine.back().is_some_and(|b| b.t_ms() >= p.t_ms()) {
            return;
        }
        push_bounded(&mut self.fine, p, FINE_POINTS);
        let start = p.t_ms() - p.t_ms().rem_euclid(COARSE_MS);
        if let Some(b) = self.bucket
            && (b.start_ms != start || b.figure != p.figure)
        {
            self.close(b);
            self.bucket = None;
        }
        let b = self.bucket.get_or_insert(Bucket {
            start_ms: start,
            figure: p.figure,
            sum: 0.0,
            sum_u: 0.0,
            n: 0,
            n_u: 0,
        });
        if p.value.is_finite() {
            b.sum += f64::from(p.value);
            b.n += 1;
        }
        if p.u.is_finite() {
            b.sum_u += f64::from(p.u);
            b.n_u += 1;
        }
    }

    fn close(&mut self, b: Bucket) {
        let mean = |s: f64, n: u32| {
            if n > 0 {
                (s / f64::from(n)) as f32
            } else {
                f32::NAN
            }
        };
        let mid_ms = b.start_ms + COARSE_MS / 2;
        if let Some(p) = Point::new(mid_ms, b.figure, mean(b.sum, b.n), mean(b.sum_u, b.n_u)) {
            push_bounded(&mut self.coarse, p, COARSE_POINTS);
        }
    }
}

/// Pushes onto a ring of at most `max` points, dropping the oldest. It grows by doubling
/// up to exactly `max`, never past it (a plain push would double 720 to 1024 slots: with
/// 100 reactors 0.7 MB held for nothing).
fn push_bounded(ring: &mut VecDeque<Point>, p: Point, max: usize) {
    if ring.len() == max {
        ring.pop_front();
    } else if ring.len() == ring.capacity() {
        let want = (2 * ring.capacity()).clamp(16, max);
        ring.reserve_exact(want - ring.len());
    }
    ring.push_back(p);
}

/// See the module docs.
#[derive(Debug)]
pub struct Live {
    site: String,
    /// `<prefix>/`: records are `<prefix>/<reactor>/result`, `/alarms`, `/command/outcome`.
    prefix: String,
    index: HashMap<String, usize>,
    reactors: Vec<ReactorLive>,
    outcomes: VecDeque<(String, Value)>,
}

/// The keys of a result the page uses; the rest (inputs, mole fractions, budgets) stay out.
const RESULT_KEYS: &[&str] = &[
    "reactor",
    "name",
    "analysis_ts",
    "evaluated_at",
    "quality",
    "reasons",
    "headline",
    "approach_k",
    "approach_uncertainty_k",
    "direction",
    "temperature_k",
    "pressure_bar",
    "key_component",
    "bed_rise",
    "bed_profile",
    "drift",
];

impl Live {
    /// Reactors by id and name, in the configuration's order.
    pub fn new(site: &str, topic_prefix: &str, reactors: &[(String, String)]) -> Self {
        Self {
            site: site.to_string(),
            prefix: format!("{topic_prefix}/"),
            index: reactors
                .iter()
                .enumerate()
                .map(|(i, (id, _))| (id.clone(), i))
                .collect(),
            reactors: reactors
                .iter()
                .map(|(id, name)| ReactorLive {
                    id: id.clone(),
                    name: name.clone(),
                    ..ReactorLive::default()
                })
                .collect(),
            outcomes: VecDeque::new(),
        }
    }

    /// The reactor index and what follows it (`result`, `alarms`, ...) of one of the
    /// plant's topics.
    fn route<'t>(&self, topic: &'t str) -> Option<(usize, &'t str)> {
        let (id, what) = topic.strip_prefix(&self.prefix)?.split_once('/')?;
        Some((*self.index.get(id)?, what))
    }

    /// One record as the pipeline emitted it; anything unreadable is ignored.
    pub fn record(&mut self, topic: &str, payload: &str, now_ms: i64) {
        let Some((i, what)) = self.route(topic) else {
            return;
        };
        match what {
            // The peek reads the whole text, so what it accepts is JSON.
            "result" => {
                if let Some(peeked) = peek_result(payload) {
                    self.add_point(i, peeked, now_ms);
                    self.keep_text(i, what, payload.to_string());
                }
            }
            "alarms" if serde_json::from_str::<serde::de::IgnoredAny>(payload).is_ok() => {
                self.keep_text(i, what, payload.to_string());
            }
            "command/outcome" => {
                let Ok(v) = serde_json::from_str::<Value>(payload) else {
                    return;
                };
                if let Some(rid) = v.get("request_id").and_then(Value::as_str) {
                    if self.outcomes.len() == OUTCOMES {
                        self.outcomes.pop_front();
                    }
                    self.outcomes.push_back((rid.to_string(), v));
                }
            }
            _ => {}
        }
    }

    /// A result's trend point read beforehand with [`peek_result`] (by the tap, so that
    /// only the point crosses to the page's thread); its text comes separately, the
    /// latest only, through [`Live::record_text`].
    pub fn record_result(&mut self, topic: &str, peeked: PeekedResult, now_ms: i64) {
        if let Some((i, "result")) = self.route(topic) {
            self.add_point(i, peeked, now_ms);
        }
    }

    /// The latest text of a reactor's result or alarm states, as the pipeline encoded it
    /// (so not read again here; text that does not parse shows as no figures).
    pub fn record_text(&mut self, topic: &str, text: String) {
        if let Some((i, what)) = self.route(topic) {
            self.keep_text(i, what, text);
        }
    }

    fn add_point(&mut self, i: usize, peeked: PeekedResult, now_ms: i64) {
        let r = &mut self.reactors[i];
        if let Some(p) = peeked.point {
            r.push(p);
        }
        r.received_ms = Some(now_ms);
    }

    /// Keeps a result's or alarm states' text (read for the page's figures only when a
    /// browser asks).
    fn keep_text(&mut self, i: usize, what: &str, text: String) {
        let slot = match what {
            "result" => &mut self.reactors[i].result,
            "alarms" => &mut self.reactors[i].alarms,
            _ => return,
        };
        *slot = Some(text);
    }

    /// The outcome of the command sent with `request_id`, once it is in.
    pub fn outcome(&self, request_id: &str) -> Option<&Value> {
        self.outcomes
            .iter()
            .rev()
            .find(|(r, _)| r == request_id)
            .map(|(_, v)| v)
    }

    pub fn has_reactor(&self, id: &str) -> bool {
        self.index.contains_key(id)
    }

    /// `/api/plant`: every reactor's latest figures and alarm states; `dropped` is how
    /// many trend points and outcomes the page skipped (it was behind the evaluator).
    pub fn plant_json(&self, now_ms: i64, dropped: u64) -> String {
        let reactors: Vec<Value> = self
            .reactors
            .iter()
            .map(|r| {
                let parse = |text: &Option<String>| {
                    text.as_deref()
                        .and_then(|t| serde_json::from_str::<Value>(t).ok())
                };
                let result = parse(&r.result).map(|v| page_result(&v));
                let mut alarms = parse(&r.alarms);
                let mut take = |key: &str| {
                    alarms
                        .as_mut()
                        .and_then(|a| a.get_mut(key))
                        .map(Value::take)
                };
                json!({
                    "id": r.id,
                    "name": r.name,
                    "received_at": r.received_ms,
                    "result": result,
                    "offline": take("offline").unwrap_or(Value::Bool(false)),
                    "alarms": take("alarms").unwrap_or(Value::Array(Vec::new())),
                })
            })
            .collect();
        json!({
            "schema": "eqwatch.page/1",
            "site": self.site,
            "now": now_ms,
            "advisory": crate::wire::result::ADVISORY_SHORT,
            "periods": PERIODS.iter().map(|(n, _)| *n).collect::<Vec<_>>(),
            "dropped": dropped,
            "reactors": reactors,
        })
        .to_string()
    }

    /// `/api/trend/<reactor>?period=<1h|8h|24h|7d>`: the latest figure's series over the
    /// period before the latest point (coarse means where the recent ring does not
    /// reach); `None` for an unknown reactor or period.
    pub fn trend_json(&self, id: &str, period: &str) -> Option<String> {
        let (_, len_ms) = PERIODS.iter().find(|(n, _)| *n == period)?;
        let r = &self.reactors[*self.index.get(id)?];
        let last = r.fine.back();
        let figure = last.map_or(Figure::None, |p| p.figure);
        let to_ms = last.map_or(0, Point::t_ms);
        let from_ms = to_ms - len_ms;
        let fine_from = r.fine.front().map_or(i64::MAX, Point::t_ms);
        let num = |x: f32| {
            if x.is_finite() {
                json!((f64::from(x) * 1e4).round() / 1e4)
            } else {
                Value::Null
            }
        };
        let points: Vec<Value> = r
            .coarse
            .iter()
            .filter(|p| p.t_ms() < fine_from)
            .chain(r.fine.iter())
            .filter(|p| p.t_ms() >= from_ms)
            .map(|p| {
                // Another figure (the approach became not meaningful, say) is a gap.
                if p.figure == figure {
                    json!([p.t_ms(), num(p.value), num(p.u)])
                } else {
                    json!([p.t_ms(), null, null])
                }
            })
            .collect();
        Some(
            json!({
                "reactor": r.id,
                "period": period,
                "figure": figure.name(),
                "unit": figure.unit(),
                "from": from_ms,
                "to": to_ms,
                "points": points,
            })
            .to_string(),
        )
    }
}

/// A result as the trend needs it: its point (none without an analysis time).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PeekedResult {
    point: Option<Point>,
}

impl From<crate::wire::result::HeadlinePoint> for PeekedResult {
    /// The point from the typed headline the pipeline gives beside the result's text
    /// (the same figures [`peek_result`] reads from the text, without reading it).
    fn from(h: crate::wire::result::HeadlinePoint) -> Self {
        let figure = Figure::of(Some(h.figure), Some(h.unit));
        PeekedResult {
            point: Point::of(h.analysis_ts_ms, figure, h.value, h.approach_uncertainty_k),
        }
    }
}

/// Reads a result for its trend point only (the rest of the message is checked and
/// skipped, no tree built); `None` if it is not a readable result.
pub fn peek_result(payload: &str) -> Option<PeekedResult> {
    let peek = serde_json::from_str::<ResultPeek<'_>>(payload).ok()?;
    let headline = peek.headline.unwrap_or_default();
    let figure = Figure::of(headline.figure.as_deref(), headline.unit.as_deref());
    let point = peek
        .analysis_ts
        .as_deref()
        .and_then(crate::timefmt::parse_rfc3339)
        .and_then(|t_ms| Point::of(t_ms, figure, headline.value, peek.approach_uncertainty_k));
    Some(PeekedResult { point })
}

/// The fields of a result a trend point needs (borrowed where the text has no escapes).
#[derive(Deserialize)]
struct ResultPeek<'a> {
    #[serde(borrow, default)]
    analysis_ts: Option<Cow<'a, str>>,
    #[serde(borrow, default)]
    headline: Option<HeadlinePeek<'a>>,
    #[serde(default)]
    approach_uncertainty_k: Option<f64>,
}

#[derive(Deserialize, Default)]
struct HeadlinePeek<'a> {
    #[serde(borrow, default)]
    figure: Option<Cow<'a, str>>,
    #[serde(borrow, default)]
    unit: Option<Cow<'a, str>>,
    #[serde(default)]
    value: Option<f64>,
}

/// The part of a result the page shows. Where the result names no approach as its
/// headline (not meaningful, or a bad result), the approach figures are left out, so
/// the page cannot show one.
pub fn page_result(v: &Value) -> Value {
    let mut out = Map::new();
    for k in RESULT_KEYS {
        if let Some(x) = v.get(*k) {
            out.insert((*k).to_string(), x.clone());
        }
    }
    let approach = v
        .get("headline")
        .and_then(|h| h.get("figure"))
        .and_then(Value::as_str)
        == Some("approach");
    if !approach {
        out.remove("approach_k");
        out.remove("approach_uncertainty_k");
    }
    Value::Object(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    const T0_MS: i64 = 1_796_083_200_000; // 2026-12-01T00:00:00Z

    fn live() -> Live {
        Live::new(
            "test",
            "eqwatch/test",
            &[
                ("lts1".into(), "LTS".into()),
                ("mth1".into(), "Methanator".into()),
            ],
        )
    }

    /// A result as the pipeline writes it, cut to what matters here (values invented).
    fn result(id: &str, t_ms: i64, headline: Value, approach: Option<f64>) -> String {
        json!({
            "schema": "eqwatch.result/1",
            "reactor": id,
            "analysis_ts": crate::timefmt::format_rfc3339(t_ms),
            "quality": "good",
            "reasons": [],
            "headline": headline,
            "approach_k": approach,
            "approach_uncertainty_k": approach.map(|_| 0.5),
            "mole_fractions": {"H2": 0.6},
            "drift": {"trend_k_per_day": 0.1},
        })
        .to_string()
    }

    fn approach(v: f64) -> Value {
        json!({"figure": "approach", "value": v, "unit": "K", "text": "approach"})
    }

    #[test]
    fn the_plant_snapshot_has_each_reactor_in_order_with_its_latest_figures() {
        let mut l = live();
        let empty: Value = serde_json::from_str(&l.plant_json(T0_MS, 0)).unwrap();
        assert_eq!(empty["reactors"][0]["id"], "lts1");
        assert_eq!(empty["reactors"][1]["result"], Value::Null);
        l.record(
            "eqwatch/test/lts1/result",
            &result("lts1", T0_MS, approach(12.0), Some(12.0)),
            T0_MS + 5,
        );
        l.record(
            "eqwatch/test/lts1/alarms",
            r#"{"schema":"eqwatch.alarms/1","offline":false,"alarms":[{"alarm":"approach-high","state":"unacknowledged","mode":"active"}]}"#,
            T0_MS + 5,
        );
        // Not for the page: another prefix, an unknown reactor, an event, not JSON.
        l.record("other/lts1/result", "{}", T0_MS);
        l.record("eqwatch/test/zzz/result", "{}", T0_MS);
        l.record("eqwatch/test/lts1/alarm", "{}", T0_MS);
        l.record("eqwatch/test/mth1/result", "not json", T0_MS);
        let v: Value = serde_json::from_str(&l.plant_json(T0_MS + 10, 0)).unwrap();
        assert_eq!(v["schema"], "eqwatch.page/1");
        assert!(
            v["advisory"]
                .as_str()
                .unwrap()
                .contains("not a safety function")
        );
        let lts = &v["reactors"][0];
        assert_eq!(lts["name"], "LTS");
        assert_eq!(lts["received_at"], T0_MS + 5);
        assert_eq!(lts["result"]["approach_k"], 12.0);
        assert_eq!(lts["result"]["drift"]["trend_k_per_day"], 0.1);
        assert!(lts["result"].get("mole_fractions").is_none(), "trimmed");
        assert_eq!(lts["alarms"][0]["state"], "unacknowledged");
        assert_eq!(v["reactors"][1]["result"], Value::Null);
    }

    #[test]
    fn no_approach_reaches_the_page_where_the_result_names_none() {
        let slip = json!({"figure": "key-measured", "value": 3.2, "unit": "ppm", "text": "CO slip 3.2 ppm"});
        let mut raw: Value =
            serde_json::from_str(&result("mth1", T0_MS, slip, Some(-40.0))).unwrap();
        let page = page_result(&raw);
        assert!(page.get("approach_k").is_none());
        assert!(page.get("approach_uncertainty_k").is_none());
        raw["headline"] = json!({"figure": "none", "value": null, "unit": "", "text": "bad"});
        assert!(page_result(&raw).get("approach_k").is_none());
    }

    #[test]
    fn the_typed_headline_gives_the_point_the_text_gives() {
        // The pipeline hands the page each result's headline beside its text; it must
        // be the point the page would read from the text, for every kind of headline.
        use crate::wire::fixtures::{AT_MS, lts1_each_headline};
        let bits = |p: PeekedResult| {
            p.point
                .map(|p| (p.t_ms(), p.value.to_bits(), p.u.to_bits(), p.figure))
        };
        let mut figures = Vec::new();
        for (s, e) in &lts1_each_headline() {
            let rs = s.reactors.iter().find(|r| r.spec.id == "lts1").unwrap();
            let (text, point) =
                crate::wire::result::encode_result_and_point(rs, &s.species, e, AT_MS, None);
            let read = peek_result(&text).expect("a readable result");
            assert_eq!(bits(PeekedResult::from(point)), bits(read), "{text}");
            figures.push(read.point.map(|p| p.figure));
        }
        assert_eq!(
            figures,
            [
                Some(Figure::ApproachK),
                Some(Figure::None),
                Some(Figure::SlipMolPct)
            ],
            "the three kinds of headline are covered"
        );
    }

    #[test]
    fn a_point_is_sixteen_bytes_and_keeps_its_time_to_the_millisecond() {
        // 100 reactors hold 139,200 points: 16 bytes each instead of 24 is 1.1 MB less.
        assert_eq!(POINT_BYTES, 16);
        for t in [0, 999, T0_MS, T0_MS + 1, i64::from(u32::MAX) * 1000 + 999] {
            let p = Point::new(t, Figure::ApproachK, 1.0, 0.5).expect("in range");
            assert_eq!(p.t_ms(), t);
        }
        assert!(
            Point::new(-1, Figure::ApproachK, 1.0, 0.5).is_none(),
            "before 1970"
        );
        assert!(
            Point::new(
                (i64::from(u32::MAX) + 1) * 1000,
                Figure::ApproachK,
                1.0,
                0.5
            )
            .is_none(),
            "after 2106"
        );
    }

    #[test]
    fn the_rings_never_hold_room_past_their_bound() {
        let mut ring = VecDeque::new();
        let p = |t| Point::new(T0_MS + t, Figure::ApproachK, 1.0, f32::NAN).unwrap();
        for t in 0..2000 {
            push_bounded(&mut ring, p(t), FINE_POINTS);
            assert!(ring.capacity() <= FINE_POINTS, "{} at {t}", ring.capacity());
        }
        assert_eq!(ring.len(), FINE_POINTS);
        assert_eq!(
            ring.front().map(Point::t_ms),
            Some(T0_MS + 2000 - FINE_POINTS as i64)
        );
    }

    #[test]
    fn the_trend_ring_is_bounded_and_periods_end_at_the_latest_point() {
        let mut l = live();
        let n = FINE_POINTS + 100;
        for i in 0..n as i64 {
            let t = T0_MS + i * MINUTE_MS;
            l.record(
                "eqwatch/test/lts1/result",
                &result("lts1", t, approach(10.0 + i as f64 / 100.0), Some(1.0)),
                t,
            );
        }
        let r = &l.reactors[0];
        assert_eq!(r.fine.len(), FINE_POINTS);
        // 820 minutes of points: 54 closed quarter hours.
        assert_eq!(r.coarse.len(), (n as i64 * MINUTE_MS / COARSE_MS) as usize);
        let last_t = T0_MS + (n as i64 - 1) * MINUTE_MS;
        let h: Value = serde_json::from_str(&l.trend_json("lts1", "1h").unwrap()).unwrap();
        assert_eq!(h["unit"], "K");
        assert_eq!(h["to"], last_t);
        let pts = h["points"].as_array().unwrap();
        assert_eq!(pts.len(), 61, "one-minute points over an hour, both ends");
        assert_eq!(pts[60][0], last_t);
        assert_eq!(pts[60][2], 0.5);
        // 24 h reaches back past the recent ring: coarse means fill the older part.
        let d: Value = serde_json::from_str(&l.trend_json("lts1", "24h").unwrap()).unwrap();
        let d = d["points"].as_array().unwrap();
        assert_eq!(d.len(), FINE_POINTS + 7, "{}", d.len());
        assert!(d.windows(2).all(|w| w[0][0].as_i64() < w[1][0].as_i64()));
        assert!(l.trend_json("lts1", "2h").is_none());
        assert!(l.trend_json("nope", "1h").is_none());
        // Never more than the bound, however long it runs.
        const { assert!(COARSE_POINTS * POINT_BYTES + FINE_POINTS * POINT_BYTES <= 40 * 1024) };
    }

    #[test]
    fn a_change_of_headline_figure_is_a_gap_on_the_chart() {
        let mut l = live();
        l.record(
            "eqwatch/test/mth1/result",
            &result("mth1", T0_MS, approach(2.0), Some(2.0)),
            T0_MS,
        );
        let slip = json!({"figure": "key-measured", "value": 3.2, "unit": "ppm"});
        l.record(
            "eqwatch/test/mth1/result",
            &result("mth1", T0_MS + MINUTE_MS, slip, None),
            T0_MS,
        );
        let v: Value = serde_json::from_str(&l.trend_json("mth1", "1h").unwrap()).unwrap();
        assert_eq!(v["unit"], "ppm");
        assert_eq!(v["points"][0][1], Value::Null);
        assert_eq!(v["points"][1][1], 3.2);
    }

    #[test]
    fn outcomes_are_found_by_request_id_and_bounded() {
        let mut l = live();
        for i in 0..OUTCOMES + 3 {
            l.record(
                "eqwatch/test/lts1/command/outcome",
                &format!(r#"{{"request_id":"r{i}","outcome":"accepted"}}"#),
                T0_MS,
            );
        }
        assert!(l.outcome("r0").is_none());
        assert_eq!(
            l.outcome(&format!("r{}", OUTCOMES + 2)).unwrap()["outcome"],
            "accepted"
        );
        assert_eq!(l.outcomes.len(), OUTCOMES);
    }
}
