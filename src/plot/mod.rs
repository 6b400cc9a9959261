//! SVG charts of a reactor's approach to equilibrium, rendered as `String`s.
//!
//! [`reactor_svg`] draws one reactor as two stacked charts sharing a time axis: the approach
//! to equilibrium (K) with its uncertainty band, baselines, trend and projection to the
//! end-of-run limit, and alert/alarm/cleared/operator markers; below it the key component,
//! measured and at equilibrium (mol% or ppm, log scale when the values span more than two
//! decades). [`overview_svg`] draws small multiples, one row per reactor, approach only.
//!
//! What this module must not do: no file or network I/O, no clock, no async runtime, no
//! crate outside `std` (it builds with `--no-default-features`). Callers pass every time in
//! (epoch milliseconds, UTC) and write the returned text wherever they like. Bad data never
//! panics: NaN/inf values, empty series, single points, equal values, zero-length or absurd
//! time ranges all give a valid SVG, with "no data" text where nothing can be drawn.
//!
//! Large series (a year of 5-minute data is ~105,000 points) are decimated per pixel column:
//! a min–max envelope plus the mean line, with a column that has no valid point breaking the
//! line. Coordinates carry one decimal place.
//!
//! Stable structure for tests and users: `<g id="approach">` (`path.line`, and in decimated
//! mode `path.envelope`), `uncertainty`, `uncertain-quality`, `gaps`, `offline` and
//! `key-offline` (`rect.offline`), `baseline`, `trend`, `projection`, `limit`, `alarm-limits`
//! (`g.alarm-limit` with `data-id`, `data-limit-k`), `aggregates` (`rect.aggregate`, class
//! `in-fit` when the trend was fitted on it), `end-of-run`, `markers` (children
//! `g.marker.alert|alarm|cleared|operator` with `data-n`, each with a `<title>`),
//! `marker-numbers` (`g.number-box`: the numbers above the chart, stacked in lanes, a run of
//! close markers sharing one box "3–5"), `events` (`g.event-row` with `data-n`: number, time,
//! who, what), `key-measured`, `key-equilibrium`, `legend`. Times are labelled in UTC or a
//! fixed offset ([`TimeZone`]; no summer-time rules), the zone written in the axis title. The root carries a
//! `<title>` with the plot title and a `<desc>` saying the chart is advisory, not a safety
//! function. Meaning is never carried by colour alone: series also differ in dash pattern and
//! markers in shape.
//!
//! # References
//! - H. Hinnant, "chrono-Compatible Low-Level Date Algorithms" (civil from days), used through
//!   [`crate::timefmt`] for the UTC tick labels.

use std::fmt::{self, Write as _};

use crate::timefmt::{civil_from_days, days_from_civil};

/// Appends formatted text to a `String` (writing to a `String` cannot fail).
macro_rules! w {
    ($out:expr, $($arg:tt)*) => {{
        let _ = write!($out, $($arg)*);
    }};
}

// ---------------------------------------------------------------------------------------------
// Public data model
// ---------------------------------------------------------------------------------------------

/// One evaluation as plotted.
#[derive(Clone, Copy, Debug, PartialEq, Default)]
pub struct PlotPoint {
    /// Epoch milliseconds (UTC).
    pub t_ms: i64,
    /// Approach to equilibrium (K); `None` = bad quality / no figure, drawn as a gap.
    pub approach_k: Option<f64>,
    /// ± half-width of the approach (K), drawn as a shaded band.
    pub uncertainty_k: Option<f64>,
    /// `false` = uncertain quality: still drawn, with a hollow marker.
    pub good: bool,
    /// Key component mole fraction (0..1), measured; values outside -0.001..1.001 are gaps.
    pub key_measured: Option<f64>,
    /// Key component mole fraction (0..1) at equilibrium; as `key_measured` for bad values.
    pub key_equilibrium: Option<f64>,
}

/// A period whose approach is the reference ("baseline"), drawn as a horizontal segment.
#[derive(Clone, Copy, Debug, PartialEq, Default)]
pub struct BaselineSpan {
    pub from_ms: i64,
    pub to_ms: i64,
    pub approach_k: f64,
    /// One standard deviation (K) of the baseline, drawn as a light band when given.
    pub sigma_k: Option<f64>,
}

/// Trend line over the data and its forward projection to the end-of-run limit.
#[derive(Clone, Debug, PartialEq, Default)]
pub struct Projection {
    /// (t_ms, fitted approach K, lower K, upper K), over the data and forward to the limit.
    pub points: Vec<(i64, f64, f64, f64)>,
    pub slope_k_per_day: f64,
    /// When the fit reaches the limit: a vertical line labelled "end of run <date>".
    pub end_of_run_ms: Option<i64>,
    /// Earliest..latest end of run (interval), drawn as a bar on the limit line.
    pub end_of_run_range_ms: Option<(i64, i64)>,
}

/// Kind of an event marker; each kind has its own colour, dash pattern and shape.
#[derive(Clone, Copy, PartialEq, Eq, Debug)]
pub enum MarkerKind {
    Alert,
    Alarm,
    Cleared,
    Operator,
}

/// An event on the time axis (alert raised, alarm, cleared, operator note). Markers are
/// numbered in time order on the chart and listed with these texts under it.
#[derive(Clone, Debug, PartialEq)]
pub struct Marker {
    pub t_ms: i64,
    pub kind: MarkerKind,
    /// Who: the reactor and alarm or alert, e.g. "alarm approach-high".
    pub source: String,
    /// What happened, e.g. "raised" or "acknowledged by op1".
    pub label: String,
}

/// An operator alarm limit on the approach, drawn as a horizontal line with its id.
#[derive(Clone, Debug, PartialEq)]
pub struct AlarmLimit {
    /// The alarm's id within the reactor, e.g. "approach-high".
    pub id: String,
    pub limit_k: f64,
    /// `true` for a high alarm (raised above the limit), `false` for a low one.
    pub high: bool,
}

/// A steady-state aggregate (mean approach over one aggregate period) as the trend sees it.
#[derive(Clone, Copy, Debug, PartialEq, Default)]
pub struct AggregatePoint {
    /// Middle of the aggregate period, epoch ms.
    pub t_ms: i64,
    pub approach_k: f64,
    /// Whether the current trend was fitted on it (filled marker) or not (hollow).
    pub in_fit: bool,
}

/// A period when the unit was off line (pressure below its off-line limit), shaded.
#[derive(Clone, Copy, Debug, PartialEq, Default)]
pub struct OfflineSpan {
    pub from_ms: i64,
    pub to_ms: i64,
}

/// Everything drawn for one reactor.
#[derive(Clone, Debug, PartialEq, Default)]
pub struct ReactorPlot {
    /// Reactor id, e.g. "lts1".
    pub reactor: String,
    /// Chart title, e.g. "Low-temperature shift converter (lts1)".
    pub title: String,
    /// Key component name, e.g. "CO".
    pub key_component: String,
    /// End-of-run limit on the approach (K): horizontal dashed line, labelled.
    pub limit_k: Option<f64>,
    /// Evaluations, time-ordered (they are sorted again here, so order is not trusted).
    pub points: Vec<PlotPoint>,
    pub baselines: Vec<BaselineSpan>,
    pub projection: Option<Projection>,
    pub markers: Vec<Marker>,
    /// Operator alarm limits on the approach (the reactor's configured alarms).
    pub alarm_limits: Vec<AlarmLimit>,
    /// Off-line periods of the unit.
    pub offline: Vec<OfflineSpan>,
    /// Steady-state aggregates the trend is fitted on.
    pub aggregates: Vec<AggregatePoint>,
    /// Length of one aggregate period (ms), for the legend ("daily mean"); 0 = not known.
    pub aggregate_period_ms: i64,
    /// Basis of the key-component values ("dry" or "wet"), written in the axis title.
    pub key_basis: Option<String>,
}

/// A fixed offset from UTC for the time-axis labels. Fixed offsets only: no daylight-saving
/// rules (a zone that changes its offset in summer is shown at one of its offsets).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub struct TimeZone {
    offset_min: i32,
}

/// A time zone text that is not "UTC" or a fixed offset such as "+01:00".
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct TimeZoneError(pub String);

impl fmt::Display for TimeZoneError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "time zone \"{}\" is not UTC or a fixed offset such as +01:00 or -05:30 \
             (offsets up to ±23:59; no named zones or summer time)",
            self.0
        )
    }
}

impl std::error::Error for TimeZoneError {}

impl TimeZone {
    pub const UTC: TimeZone = TimeZone { offset_min: 0 };

    /// A zone `offset_min` minutes ahead of UTC; `None` beyond ±23:59 (the RFC 3339 range).
    pub fn fixed(offset_min: i32) -> Option<TimeZone> {
        (offset_min.abs() < 24 * 60).then_some(TimeZone { offset_min })
    }

    /// "UTC", "Z", "+01:00", "-0530", "+01", "UTC+01:00" (case-insensitive prefix).
    pub fn parse(text: &str) -> Result<TimeZone, TimeZoneError> {
        let err = || TimeZoneError(text.to_string());
        let t = text.trim();
        if t.eq_ignore_ascii_case("utc") || t.eq_ignore_ascii_case("z") {
            return Ok(TimeZone::UTC);
        }
        let t = match t.get(..3) {
            Some(p) if p.eq_ignore_ascii_case("utc") => &t[3..],
            _ => t,
        };
        let (sign, rest) = match t.as_bytes().first() {
            Some(b'+') => (1, &t[1..]),
            Some(b'-') => (-1, &t[1..]),
            _ => return Err(err()),
        };
        let digits = |s: &str| s.len() == 2 && s.bytes().all(|b| b.is_ascii_digit());
        let (hh, mm) = match rest.split_once(':') {
            Some((h, m)) if digits(h) && digits(m) => (h, m),
            None if rest.len() == 4
                && rest.is_ascii()
                && digits(&rest[..2])
                && digits(&rest[2..]) =>
            {
                (&rest[..2], &rest[2..])
            }
            None if digits(rest) => (rest, "00"),
            _ => return Err(err()),
        };
        let (h, m): (i32, i32) = match (hh.parse(), mm.parse()) {
            (Ok(h), Ok(m)) if h < 24 && m < 60 => (h, m),
            _ => return Err(err()),
        };
        TimeZone::fixed(sign * (h * 60 + m)).ok_or_else(err)
    }

    pub fn offset_minutes(&self) -> i32 {
        self.offset_min
    }

    fn offset_ms(&self) -> i64 {
        i64::from(self.offset_min) * MINUTE_MS
    }

    /// "UTC" or "UTC+01:00".
    pub fn name(&self) -> String {
        if self.offset_min == 0 {
            return "UTC".to_string();
        }
        let sign = if self.offset_min < 0 { '-' } else { '+' };
        let a = self.offset_min.unsigned_abs();
        format!("UTC{sign}{:02}:{:02}", a / 60, a % 60)
    }
}

// ---------------------------------------------------------------------------------------------
// Constants: layout, colours, limits of what is plotted
// ---------------------------------------------------------------------------------------------

const WIDTH: f64 = 1000.0;
const HEIGHT: f64 = 640.0;
const LEFT: f64 = 84.0;
const RIGHT: f64 = 976.0;

use crate::units::{DAY_MS, HOUR_MS, MINUTE_MS};
const MONTH_MS_APPROX: i64 = 2_629_746_000; // 365.2425 / 12 days
const YEAR_MS_APPROX: i64 = 31_556_952_000; // 365.2425 days

/// Earliest plotted instant, 0001-01-01T00:00:00Z (checked with Python's datetime module).
const T_LO: i64 = -62_135_596_800_000;
/// Latest plotted instant, 9999-12-31T23:59:59.999Z (checked with Python's datetime module).
const T_HI: i64 = 253_402_300_799_999;
/// Values beyond this magnitude are treated like NaN (no approach or mole fraction is near).
const V_MAX: f64 = 1e15;
/// The projection may extend the time axis by at most the data span divided by this.
const PROJECTION_DIVISOR: i64 = 2;

const C_TEXT: &str = "#222";
const C_MUTED: &str = "#666";
const C_FRAME: &str = "#888";
const C_GRID: &str = "#e4e4e4";
const C_APPROACH: &str = "#0072b2";
const C_BAND: &str = "#56b4e9";
const C_GAP: &str = "#9e9e9e";
const C_BASELINE: &str = "#009e73";
const C_TREND: &str = "#d55e00";
const C_PROJ_BAND: &str = "#e69f00";
const C_LIMIT: &str = "#b2182b";
const C_END_OF_RUN: &str = "#333";
const C_MEASURED: &str = "#0072b2";
const C_OFFLINE: &str = "#8c6d31";
const C_ALARM_LIMIT: &str = "#762a83";
const C_AGGREGATE: &str = "#1a1a1a";
const C_EQUILIBRIUM: &str = "#cc79a7";

const DASH_BASELINE: &str = "9 3 2 3";
const DASH_TREND: &str = "7 4";
const DASH_FORWARD: &str = "2 3";
const DASH_LIMIT: &str = "12 4";
const DASH_END_OF_RUN: &str = "3 3";
const DASH_EQUILIBRIUM: &str = "6 3";
const DASH_ALARM_LIMIT: &str = "10 3 2 3 2 3";

impl MarkerKind {
    fn class(self) -> &'static str {
        match self {
            MarkerKind::Alert => "alert",
            MarkerKind::Alarm => "alarm",
            MarkerKind::Cleared => "cleared",
            MarkerKind::Operator => "operator",
        }
    }
    fn colour(self) -> &'static str {
        match self {
            MarkerKind::Alert => "#e08a00",
            MarkerKind::Alarm => "#b2182b",
            MarkerKind::Cleared => "#009e73",
            MarkerKind::Operator => "#7b3294",
        }
    }
    /// Dash pattern of the vertical line; empty = solid.
    fn dash(self) -> &'static str {
        match self {
            MarkerKind::Alert => "5 3",
            MarkerKind::Alarm => "",
            MarkerKind::Cleared => "1.5 3",
            MarkerKind::Operator => "8 3 1.5 3",
        }
    }
    const ALL: [MarkerKind; 4] = [
        MarkerKind::Alert,
        MarkerKind::Alarm,
        MarkerKind::Cleared,
        MarkerKind::Operator,
    ];
}

// ---------------------------------------------------------------------------------------------
// Small text helpers
// ---------------------------------------------------------------------------------------------

/// XML-escaped text; characters that XML 1.0 forbids become spaces.
struct Esc<'a>(&'a str);

impl fmt::Display for Esc<'_> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        for c in self.0.chars() {
            match c {
                '&' => f.write_str("&amp;")?,
                '<' => f.write_str("&lt;")?,
                '>' => f.write_str("&gt;")?,
                '"' => f.write_str("&quot;")?,
                '\'' => f.write_str("&apos;")?,
                '\t' | '\n' | '\r' => f.write_char(c)?,
                c if (c as u32) < 0x20 || c == '\u{fffe}' || c == '\u{ffff}' => {
                    f.write_char(' ')?
                }
                c => f.write_char(c)?,
            }
        }
        Ok(())
    }
}

/// A coordinate with at most one decimal place ("12", "12.5"; never "-0"), clamped to ±1e6.
#[derive(Clone, Copy)]
struct N(f64);

impl fmt::Display for N {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let v = if self.0.is_finite() {
            self.0.clamp(-1e6, 1e6)
        } else {
            0.0
        };
        let tenths = (v * 10.0).round() as i64;
        if tenths == 0 {
            f.write_str("0")
        } else if tenths % 10 == 0 {
            write!(f, "{}", tenths / 10)
        } else {
            let sign = if tenths < 0 { "-" } else { "" };
            let a = tenths.unsigned_abs();
            write!(f, "{sign}{}.{}", a / 10, a % 10)
        }
    }
}

/// Width of `s` in px at `size` px font, estimated on the generous side per character
/// class (digits of common sans-serif faces are about 0.64 em wide, from memory), so that
/// boxes placed with it do not overlap when rendered.
fn text_width(s: &str, size: f64) -> f64 {
    let em: f64 = s
        .chars()
        .map(|c| match c {
            '0'..='9' => 0.64,
            ' ' | '.' | ',' | ':' | ';' | '\'' | '|' | '!' => 0.34,
            'i' | 'j' | 'l' | 'f' | 't' | 'r' | '-' | '(' | ')' => 0.42,
            'm' | 'w' | 'M' | 'W' | '%' | '—' => 0.9,
            'A'..='Z' | '–' | '±' | '→' | '←' => 0.72,
            _ => 0.62,
        })
        .sum();
    em * size
}

/// `v` with `dec` decimals, "0" instead of "-0.0", exponent form for huge magnitudes.
fn fmt_fixed(v: f64, dec: usize) -> String {
    if !v.is_finite() {
        return "?".to_string();
    }
    if v.abs() >= 1e7 {
        return format!("{v:.2e}");
    }
    let s = format!("{v:.dec$}");
    if s.trim_start_matches('-')
        .chars()
        .all(|c| c == '0' || c == '.')
    {
        "0".to_string()
    } else {
        s
    }
}

/// `v` with about `sig` significant digits and no trailing zeros (labels such as slopes).
fn fmt_sig(v: f64, sig: i32) -> String {
    if !v.is_finite() {
        return "?".to_string();
    }
    if v == 0.0 {
        return "0".to_string();
    }
    let mag = v.abs().log10().floor() as i32;
    let dec = (sig - 1 - mag).clamp(0, 8) as usize;
    let s = fmt_fixed(v, dec);
    if s.contains('.') && !s.contains('e') {
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        s
    }
}

/// A mole fraction that can be plotted: 0..1, with a little room for analyser zero drift.
fn usable_fraction(v: f64) -> bool {
    (-1e-3..=1.001).contains(&v)
}

fn usable(v: f64) -> bool {
    v.is_finite() && v.abs() < V_MAX
}

fn sane_t(t: i64) -> bool {
    (T_LO..=T_HI).contains(&t)
}

// ---------------------------------------------------------------------------------------------
// UTC dates from epoch milliseconds
// ---------------------------------------------------------------------------------------------

/// Calendar fields of an instant, UTC.
struct Civil {
    y: i64,
    mo: u32,
    d: u32,
    h: i64,
    mi: i64,
}

/// Splits epoch ms into UTC calendar fields (days → date by Hinnant's civil-from-days).
fn civil(ms: i64) -> Civil {
    let secs = ms.div_euclid(1000);
    let (y, mo, d) = civil_from_days(secs.div_euclid(86_400));
    let sod = secs.rem_euclid(86_400);
    Civil {
        y,
        mo,
        d,
        h: sod / 3600,
        mi: sod % 3600 / 60,
    }
}

/// The zone offset of an axis (0 without one), ms.
fn tz_ms(ta: Option<&TimeAxis>) -> i64 {
    ta.map_or(0, |t| t.tz.offset_ms())
}

/// "2026-03-01".
fn fmt_date(ms: i64) -> String {
    let c = civil(ms);
    format!("{:04}-{:02}-{:02}", c.y, c.mo, c.d)
}

/// "2026-03-01 12:00".
fn fmt_datetime(ms: i64) -> String {
    let c = civil(ms);
    format!("{:04}-{:02}-{:02} {:02}:{:02}", c.y, c.mo, c.d, c.h, c.mi)
}

// ---------------------------------------------------------------------------------------------
// Axes
// ---------------------------------------------------------------------------------------------

/// Pixel rectangle of one plot area.
#[derive(Clone, Copy, Debug)]
struct Area {
    x0: f64,
    y0: f64,
    x1: f64,
    y1: f64,
}

impl Area {
    fn w(&self) -> f64 {
        self.x1 - self.x0
    }
    fn h(&self) -> f64 {
        self.y1 - self.y0
    }
    fn mid_x(&self) -> f64 {
        0.5 * (self.x0 + self.x1)
    }
    fn mid_y(&self) -> f64 {
        0.5 * (self.y0 + self.y1)
    }
}

/// A y axis: range in axis units (log10 of the value on a log axis) and labelled ticks.
#[derive(Clone, Debug)]
struct Axis {
    lo: f64,
    hi: f64,
    log: bool,
    ticks: Vec<(f64, String)>,
}

/// 1, 2 or 5 × 10^n, the smallest not below `raw`.
fn nice_step(raw: f64) -> f64 {
    if !(raw > 0.0 && raw.is_finite()) {
        return 1.0;
    }
    let base = 10f64.powf(raw.log10().floor());
    let f = raw / base;
    let m = if f <= 1.0 + 1e-9 {
        1.0
    } else if f <= 2.0 + 1e-9 {
        2.0
    } else if f <= 5.0 + 1e-9 {
        5.0
    } else {
        10.0
    };
    m * base
}

/// Decimals needed to print multiples of `step` exactly.
fn decimals_for(step: f64) -> usize {
    if step >= 1.0 || step.is_nan() || step <= 0.0 {
        0
    } else {
        ((-(step.log10() + 1e-9).floor()) as usize).min(10)
    }
}

/// Linear axis over [min, max] with about `target` nice ticks; equal or reversed bounds are
/// widened so that the axis always has a positive length.
fn linear_axis(min: f64, max: f64, target: usize) -> Axis {
    let (mut a, mut b) = if min <= max { (min, max) } else { (max, min) };
    if !(usable(a) && usable(b)) {
        (a, b) = (0.0, 1.0);
    }
    if b - a <= a.abs().max(b.abs()) * 1e-9 || b - a < 1e-300 {
        let mid = 0.5 * (a + b);
        let pad = if mid.abs() > 1e-12 {
            mid.abs() * 0.1
        } else {
            1.0
        };
        (a, b) = (mid - pad, mid + pad);
    }
    // A little room at both ends, but never across zero (an axis from 0 stays at 0).
    let pad = (b - a) * 0.02;
    (a, b) = (
        if a >= 0.0 {
            (a - pad).max(0.0)
        } else {
            a - pad
        },
        if b <= 0.0 {
            (b + pad).min(0.0)
        } else {
            b + pad
        },
    );
    let step = nice_step((b - a) / target.max(2) as f64);
    let (lo, hi) = ((a / step).floor() * step, (b / step).ceil() * step);
    if !(hi > lo && (hi - lo).is_finite()) {
        return linear_axis(0.0, 1.0, target);
    }
    let n = ((hi - lo) / step).round().clamp(1.0, 60.0) as i64;
    let dec = decimals_for(step);
    let k0 = (lo / step).round();
    // Steps below 0.0001 read better as "1.2e-7" than as "0.00000012".
    let top = lo.abs().max(hi.abs());
    let sci = dec > 4 && top < 1e-3;
    let mantissa = if sci {
        (top.log10().floor() - step.log10().floor()).clamp(0.0, 6.0) as usize
    } else {
        0
    };
    let ticks = (0..=n)
        .map(|i| {
            let v = (k0 + i as f64) * step;
            let text = if sci && v != 0.0 {
                format!("{v:.mantissa$e}")
            } else {
                fmt_fixed(v, dec)
            };
            (v, text)
        })
        .collect();
    Axis {
        lo,
        hi,
        log: false,
        ticks,
    }
}

/// "0.01", "1", "1000" for moderate powers of ten, "1e-5" beyond.
fn fmt_pow10(e: i64) -> String {
    if (-3..0).contains(&e) {
        format!("{:.*}", e.unsigned_abs() as usize, 10f64.powi(e as i32))
    } else if (0..=4).contains(&e) {
        10i64.pow(e as u32).to_string()
    } else {
        format!("1e{e}")
    }
}

/// Log10 axis over the positive range [min, max], ticks at whole decades (every k-th when
/// the range spans many decades).
fn log_axis(min: f64, max: f64) -> Axis {
    let (a, b) = if min <= max { (min, max) } else { (max, min) };
    if !(a > 0.0 && usable(a) && usable(b)) {
        return log_axis(1.0, 10.0);
    }
    let lo = a.log10().floor().max(-300.0);
    let mut hi = b.log10().ceil().min(300.0);
    if hi <= lo {
        hi = lo + 1.0;
    }
    let k = ((hi - lo) / 7.0).ceil().max(1.0);
    let mut ticks = Vec::new();
    let mut e = (lo / k).ceil() * k;
    while e <= hi + 1e-9 && ticks.len() < 60 {
        ticks.push((e, fmt_pow10(e as i64)));
        e += k;
    }
    Axis {
        lo,
        hi,
        log: true,
        ticks,
    }
}

/// Maps values to pixel rows of an area.
#[derive(Clone, Debug)]
struct YScale {
    axis: Axis,
    top: f64,
    bottom: f64,
}

impl YScale {
    /// Pixel row of `v`, or `None` when it cannot be drawn (NaN, or ≤ 0 on a log axis).
    fn y(&self, v: f64) -> Option<f64> {
        let u = if self.axis.log {
            if v > 0.0 { v.log10() } else { return None }
        } else {
            v
        };
        if !usable(u) {
            return None;
        }
        let span = self.axis.hi - self.axis.lo;
        Some(self.bottom - (u - self.axis.lo) / span * (self.bottom - self.top))
    }
    /// Pixel row of an axis-unit value (a tick).
    fn y_axis_units(&self, u: f64) -> f64 {
        let span = self.axis.hi - self.axis.lo;
        self.bottom - (u - self.axis.lo) / span * (self.bottom - self.top)
    }
}

/// Time step between ticks.
#[derive(Clone, Copy, Debug, PartialEq)]
enum TimeStep {
    Ms(i64),
    Months(i64),
    Years(i64),
}

/// The time range of a chart and its mapping to pixel columns.
#[derive(Clone, Copy, Debug)]
struct TimeScale {
    t0: i64,
    t1: i64,
    x0: f64,
    x1: f64,
}

impl TimeScale {
    /// `t0 < t1` is guaranteed by [`TimeScale::new`].
    fn new(t0: i64, t1: i64, x0: f64, x1: f64) -> TimeScale {
        let (mut t0, mut t1) = (t0.min(t1), t0.max(t1));
        if t1 - t0 < MINUTE_MS {
            let mid = t0 + (t1 - t0) / 2;
            (t0, t1) = (mid - 30 * MINUTE_MS, mid + 30 * MINUTE_MS);
        }
        TimeScale { t0, t1, x0, x1 }
    }
    fn x(&self, t: i64) -> f64 {
        let frac = (t as f64 - self.t0 as f64) / (self.t1 as f64 - self.t0 as f64);
        self.x0 + frac * (self.x1 - self.x0)
    }
    fn contains(&self, t: i64) -> bool {
        (self.t0..=self.t1).contains(&t)
    }
}

/// Tick step for a span so that there are at most `max_ticks` intervals.
fn choose_time_step(span_ms: i64, max_ticks: i64) -> TimeStep {
    const FIXED: [i64; 15] = [
        MINUTE_MS,
        2 * MINUTE_MS,
        5 * MINUTE_MS,
        10 * MINUTE_MS,
        15 * MINUTE_MS,
        30 * MINUTE_MS,
        HOUR_MS,
        2 * HOUR_MS,
        3 * HOUR_MS,
        6 * HOUR_MS,
        12 * HOUR_MS,
        DAY_MS,
        2 * DAY_MS,
        7 * DAY_MS,
        14 * DAY_MS,
    ];
    let span = span_ms.max(1);
    if let Some(s) = FIXED.iter().find(|&&s| span / s < max_ticks) {
        return TimeStep::Ms(*s);
    }
    if let Some(m) = [1, 2, 3, 6]
        .iter()
        .find(|&&m| span / (m * MONTH_MS_APPROX) < max_ticks)
    {
        return TimeStep::Months(*m);
    }
    let mut k = 1i64;
    while k < 100_000 {
        for f in [1, 2, 5] {
            if span / (f * k * YEAR_MS_APPROX) < max_ticks {
                return TimeStep::Years(f * k);
            }
        }
        k *= 10;
    }
    TimeStep::Years(k)
}

/// Tick instants in [t0, t1], aligned to whole units in UTC (weeks start on Monday).
fn time_ticks(t0: i64, t1: i64, step: TimeStep) -> Vec<i64> {
    const CAP: usize = 200;
    let mut v = Vec::new();
    match step {
        TimeStep::Ms(s) => {
            // 1970-01-05 was a Monday (checked with Python's datetime module).
            let off = if s % (7 * DAY_MS) == 0 { 4 * DAY_MS } else { 0 };
            let mut t = (t0 - off).div_euclid(s) * s + off;
            if t < t0 {
                t += s;
            }
            while t <= t1 && v.len() < CAP {
                v.push(t);
                t += s;
            }
        }
        TimeStep::Months(k) => {
            let c = civil(t0);
            let mut m = (c.y * 12 + i64::from(c.mo) - 1).div_euclid(k) * k;
            for _ in 0..(CAP * 2) {
                let (y, mo) = (m.div_euclid(12), (m.rem_euclid(12) + 1) as u32);
                let t = days_from_civil(y, mo, 1) * DAY_MS;
                if t > t1 || v.len() >= CAP {
                    break;
                }
                if t >= t0 {
                    v.push(t);
                }
                m += k;
            }
        }
        TimeStep::Years(k) => {
            let mut y = civil(t0).y.div_euclid(k) * k;
            for _ in 0..(CAP * 2) {
                let t = days_from_civil(y, 1, 1) * DAY_MS;
                if t > t1 || v.len() >= CAP {
                    break;
                }
                if t >= t0 {
                    v.push(t);
                }
                y += k;
            }
        }
    }
    v
}

/// Label of a tick for the step in use.
fn time_label(t: i64, step: TimeStep) -> String {
    let c = civil(t);
    match step {
        TimeStep::Ms(s) if s < DAY_MS => {
            format!("{:02}-{:02} {:02}:{:02}", c.mo, c.d, c.h, c.mi)
        }
        TimeStep::Ms(_) => format!("{:04}-{:02}-{:02}", c.y, c.mo, c.d),
        TimeStep::Months(_) => format!("{:04}-{:02}", c.y, c.mo),
        TimeStep::Years(_) => format!("{:04}", c.y),
    }
}

/// Ticks and labels of a time axis in a fixed-offset zone, plus the x-axis caption
/// ("time (UTC)", "time (UTC+01:00)", with the year when the tick labels leave it out).
/// Ticks fall on whole local units (local midnight, the first of a local month).
struct TimeAxis {
    scale: TimeScale,
    step: TimeStep,
    ticks: Vec<(i64, String)>,
    caption: String,
    tz: TimeZone,
}

fn time_axis(scale: TimeScale, tz: TimeZone) -> TimeAxis {
    let off = tz.offset_ms();
    let step = choose_time_step(scale.t1 - scale.t0, 9);
    let ticks = time_ticks(scale.t0 + off, scale.t1 + off, step)
        .into_iter()
        .map(|local| (local - off, time_label(local, step)))
        .collect();
    let zone = tz.name();
    let caption = match step {
        TimeStep::Ms(s) if s < DAY_MS => {
            let (a, b) = (civil(scale.t0 + off).y, civil(scale.t1 + off).y);
            if a == b {
                format!("time ({zone}), {a}")
            } else {
                format!("time ({zone}), {a}–{b}")
            }
        }
        _ => format!("time ({zone})"),
    };
    TimeAxis {
        scale,
        step,
        ticks,
        caption,
        tz,
    }
}

impl TimeAxis {
    /// Date text for a label on this axis: with the time of day when ticks are sub-day.
    fn when(&self, t: i64) -> String {
        match self.step {
            TimeStep::Ms(s) if s < DAY_MS => self.datetime(t),
            _ => self.date(t),
        }
    }
    /// "2026-03-01" in the axis's zone.
    fn date(&self, t: i64) -> String {
        fmt_date(t + self.tz.offset_ms())
    }
    /// "2026-03-01 12:00" in the axis's zone.
    fn datetime(&self, t: i64) -> String {
        fmt_datetime(t + self.tz.offset_ms())
    }
}

// ---------------------------------------------------------------------------------------------
// Series geometry: raw samples, per-column decimation, paths
// ---------------------------------------------------------------------------------------------

/// One sample in pixel space. `y: None` breaks the line.
#[derive(Clone, Copy, Debug)]
struct Px {
    x: f64,
    y: Option<f64>,
    /// (upper, lower) pixel rows of a band around `y` (uncertainty).
    band: Option<(f64, f64)>,
    /// (upper, lower) pixel rows of the column envelope (decimated samples only).
    env: Option<(f64, f64)>,
    good: bool,
}

/// Running aggregate of the samples falling in one pixel column.
#[derive(Clone, Copy, Default)]
struct Column {
    n: u32,
    sum: f64,
    min: f64,
    max: f64,
    uncertain: u32,
    n_band: u32,
    sum_hi: f64,
    sum_lo: f64,
}

/// Series with more samples than this many per pixel column are decimated.
const DECIMATE_PER_PX: f64 = 2.0;

/// Samples as drawn: the raw ones, or one per pixel column when there are more than
/// [`DECIMATE_PER_PX`] per pixel of the width they cover.
fn drawable(samples: Vec<Px>, area: Area) -> (Vec<Px>, bool) {
    let (lo, hi) = samples
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), s| {
            (a.min(s.x), b.max(s.x))
        });
    let covered = (hi - lo).clamp(1.0, area.w().max(1.0));
    if samples.len() as f64 > DECIMATE_PER_PX * covered {
        (decimate(&samples, area), true)
    } else {
        (samples, false)
    }
}

/// One sample per pixel column: mean line, min–max envelope, mean band; a column without a
/// valid sample is a break.
fn decimate(samples: &[Px], area: Area) -> Vec<Px> {
    let ncols = area.w().ceil().max(1.0) as usize;
    let mut cols = vec![Column::default(); ncols];
    for s in samples {
        let Some(y) = s.y else { continue };
        let c = (s.x - area.x0).floor();
        if !(c > -1.5 && c < ncols as f64 + 0.5) {
            continue;
        }
        let col = &mut cols[(c.max(0.0) as usize).min(ncols - 1)];
        if col.n == 0 {
            (col.min, col.max) = (y, y);
        } else {
            col.min = col.min.min(y);
            col.max = col.max.max(y);
        }
        col.n += 1;
        col.sum += y;
        if !s.good {
            col.uncertain += 1;
        }
        if let Some((hi, lo)) = s.band {
            col.n_band += 1;
            col.sum_hi += hi;
            col.sum_lo += lo;
        }
    }
    cols.iter()
        .enumerate()
        .map(|(i, c)| {
            let x = area.x0 + i as f64 + 0.5;
            if c.n == 0 {
                return Px {
                    x,
                    y: None,
                    band: None,
                    env: None,
                    good: true,
                };
            }
            let n = f64::from(c.n);
            let band = (c.n_band > 0).then(|| {
                let nb = f64::from(c.n_band);
                (c.sum_hi / nb, c.sum_lo / nb)
            });
            Px {
                x,
                y: Some(c.sum / n),
                band,
                // Pixel rows grow downwards: the upper edge is the smallest row.
                env: Some((c.min, c.max)),
                good: c.uncertain * 2 <= c.n,
            }
        })
        .collect()
}

/// The min–max envelope of a decimated series (per pixel column), as one path.
fn envelope(out: &mut String, series: &[Px], colour: &str, fill_opacity: &str) {
    let (env, bars) = band_path(series, |q| q.y.and(q.env));
    let d = [env, bars]
        .into_iter()
        .filter(|s| !s.is_empty())
        .collect::<Vec<_>>()
        .join(" ");
    if !d.is_empty() {
        w!(
            out,
            "<path class=\"envelope\" d=\"{d}\" fill=\"{colour}\" fill-opacity=\"{fill_opacity}\" \
             stroke=\"{colour}\" stroke-opacity=\"0.3\" stroke-width=\"1\"/>"
        );
    }
}

/// Polyline through the valid samples, one sub-path per run; also the isolated points (runs
/// of one sample), which a line cannot show.
fn line_path(s: &[Px]) -> (String, Vec<(f64, f64)>) {
    let mut d = String::new();
    let mut isolated = Vec::new();
    let mut run = 0usize;
    for (i, p) in s.iter().enumerate() {
        match p.y {
            Some(y) => {
                if run == 0 {
                    if !d.is_empty() {
                        d.push(' ');
                    }
                    w!(d, "M{},{}", N(p.x), N(y));
                } else if run == 1 {
                    w!(d, " L{},{}", N(p.x), N(y));
                } else {
                    w!(d, " {},{}", N(p.x), N(y));
                }
                run += 1;
                let next_valid = s.get(i + 1).is_some_and(|q| q.y.is_some());
                if run == 1 && !next_valid {
                    isolated.push((p.x, y));
                }
            }
            None => run = 0,
        }
    }
    (d, isolated)
}

/// Closed areas between the two rows that `pick` gives, one per run of samples; runs of a
/// single sample come back separately as vertical bars (a polygon would have no width).
fn band_path(s: &[Px], pick: impl Fn(&Px) -> Option<(f64, f64)>) -> (String, String) {
    let mut areas = String::new();
    let mut bars = String::new();
    let mut i = 0;
    while i < s.len() {
        if pick(&s[i]).is_none() {
            i += 1;
            continue;
        }
        let start = i;
        while i < s.len() && pick(&s[i]).is_some() {
            i += 1;
        }
        let run = &s[start..i];
        if let [only] = run {
            if let Some((a, b)) = pick(only) {
                if !bars.is_empty() {
                    bars.push(' ');
                }
                w!(bars, "M{},{} V{}", N(only.x), N(a), N(b));
            }
            continue;
        }
        if !areas.is_empty() {
            areas.push(' ');
        }
        for (k, p) in run.iter().enumerate() {
            if let Some((a, _)) = pick(p) {
                match k {
                    0 => w!(areas, "M{},{}", N(p.x), N(a)),
                    1 => w!(areas, " L{},{}", N(p.x), N(a)),
                    _ => w!(areas, " {},{}", N(p.x), N(a)),
                }
            }
        }
        for p in run.iter().rev() {
            if let Some((_, b)) = pick(p) {
                w!(areas, " {},{}", N(p.x), N(b));
            }
        }
        areas.push_str(" Z");
    }
    (areas, bars)
}

/// Pixel spans of bad-quality gaps: from the last valid sample before a run of invalid ones
/// to the first valid one after it; at least 1 px wide, merged where they touch.
fn gap_spans(s: &[Px], area: Area) -> Vec<(f64, f64)> {
    let mut spans: Vec<(f64, f64)> = Vec::new();
    let mut last_valid: Option<f64> = None;
    let mut open: Option<(f64, f64)> = None;
    for p in s {
        if p.y.is_some() {
            if let Some((a, _)) = open.take() {
                spans.push((a, p.x));
            }
            last_valid = Some(p.x);
        } else {
            open = match open {
                Some((a, _)) => Some((a, p.x)),
                None => Some((last_valid.unwrap_or(p.x), p.x)),
            };
        }
    }
    spans.extend(open);
    let mut merged: Vec<(f64, f64)> = Vec::new();
    for (a, b) in spans {
        let (mut a, mut b) = (a.max(area.x0), b.min(area.x1));
        if b - a < 1.0 {
            let mid = 0.5 * (a + b);
            (a, b) = (mid - 0.5, mid + 0.5);
        }
        match merged.last_mut() {
            Some(last) if a <= last.1 + 0.5 => last.1 = last.1.max(b),
            _ => merged.push((a, b)),
        }
    }
    merged
}

// ---------------------------------------------------------------------------------------------
// Drawing helpers
// ---------------------------------------------------------------------------------------------

/// `stroke-dasharray` attribute, or nothing for a solid line.
fn dash_attr(dash: &str) -> String {
    if dash.is_empty() {
        String::new()
    } else {
        format!(" stroke-dasharray=\"{dash}\"")
    }
}

fn clip_rect(out: &mut String, id: &str, a: Area) {
    w!(
        out,
        "<clipPath id=\"{id}\"><rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\"/></clipPath>",
        N(a.x0),
        N(a.y0),
        N(a.w()),
        N(a.h())
    );
}

/// Horizontal grid lines, tick labels and the rotated y label.
fn draw_y_axis(out: &mut String, area: Area, ys: &YScale, label: &str) {
    out.push_str("<g class=\"y-axis\">");
    for (u, text) in &ys.axis.ticks {
        let y = ys.y_axis_units(*u);
        w!(
            out,
            "<line x1=\"{}\" y1=\"{y}\" x2=\"{}\" y2=\"{y}\" stroke=\"{C_GRID}\"/>\
             <text x=\"{}\" y=\"{}\" text-anchor=\"end\" fill=\"{C_TEXT}\">{}</text>",
            N(area.x0),
            N(area.x1),
            N(area.x0 - 5.0),
            N(y + 3.5),
            Esc(text),
            y = N(y)
        );
    }
    // The rotated title (12 px: about 9 px left and 3 px right of its baseline) clear of
    // the widest tick label.
    let lx = (area.x0 - 5.0 - tick_label_w(&ys.axis) - 8.0 - 3.0).max(12.0);
    let ly = area.mid_y();
    w!(
        out,
        "<text class=\"axis-label\" x=\"{}\" y=\"{}\" transform=\"rotate(-90 {} {})\" \
         text-anchor=\"middle\" font-size=\"12\" fill=\"{C_TEXT}\">{}</text></g>",
        N(lx),
        N(ly),
        N(lx),
        N(ly),
        Esc(label)
    );
}

/// Vertical grid lines at the time ticks, with labels below the area when `labels`.
fn draw_time_grid(out: &mut String, area: Area, ta: &TimeAxis, labels: bool) {
    out.push_str("<g class=\"x-axis\">");
    let mut last_right = f64::NEG_INFINITY;
    for (t, text) in &ta.ticks {
        let x = ta.scale.x(*t);
        w!(
            out,
            "<line x1=\"{x}\" y1=\"{}\" x2=\"{x}\" y2=\"{}\" stroke=\"{C_GRID}\"/>",
            N(area.y0),
            N(area.y1),
            x = N(x)
        );
        if labels {
            // A label that would run off the right edge ends at its tick instead.
            let tw = text_width(text, 11.0);
            let (anchor, left) = if x + 0.5 * tw > WIDTH - 4.0 {
                ("end", x - tw)
            } else {
                ("middle", x - 0.5 * tw)
            };
            // A label that would touch the one before it is left out (its tick stays).
            if left < last_right + 8.0 {
                w!(
                    out,
                    "<line x1=\"{x}\" y1=\"{}\" x2=\"{x}\" y2=\"{}\" stroke=\"{C_FRAME}\"/>",
                    N(area.y1),
                    N(area.y1 + 4.0),
                    x = N(x)
                );
                continue;
            }
            last_right = left + tw;
            w!(
                out,
                "<line x1=\"{x}\" y1=\"{}\" x2=\"{x}\" y2=\"{}\" stroke=\"{C_FRAME}\"/>\
                 <text x=\"{x}\" y=\"{}\" text-anchor=\"{anchor}\" fill=\"{C_TEXT}\">{}</text>",
                N(area.y1),
                N(area.y1 + 4.0),
                N(area.y1 + 16.0),
                Esc(text),
                x = N(x)
            );
        }
    }
    out.push_str("</g>");
}

fn draw_frame(out: &mut String, a: Area) {
    w!(
        out,
        "<rect class=\"frame\" x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" fill=\"none\" stroke=\"{C_FRAME}\"/>",
        N(a.x0),
        N(a.y0),
        N(a.w()),
        N(a.h())
    );
}

/// Centred grey message inside an area (used for "no data").
fn draw_message(out: &mut String, a: Area, text: &str) {
    w!(
        out,
        "<text class=\"no-data\" x=\"{}\" y=\"{}\" text-anchor=\"middle\" font-size=\"14\" fill=\"{C_MUTED}\">{}</text>",
        N(a.mid_x()),
        N(a.mid_y()),
        Esc(text)
    );
}

/// A marker's shape centred at (x, y), size `r` px; each kind has its own shape.
fn marker_shape(out: &mut String, kind: MarkerKind, x: f64, y: f64, r: f64) {
    let c = kind.colour();
    match kind {
        // Triangle pointing down.
        MarkerKind::Alert => w!(
            out,
            "<path d=\"M{},{} L{},{} {},{} Z\" fill=\"{c}\" stroke=\"#fff\" stroke-width=\"0.8\"/>",
            N(x - r),
            N(y - 0.8 * r),
            N(x + r),
            N(y - 0.8 * r),
            N(x),
            N(y + r)
        ),
        // Diamond.
        MarkerKind::Alarm => w!(
            out,
            "<path d=\"M{},{} L{},{} {},{} {},{} Z\" fill=\"{c}\" stroke=\"#fff\" stroke-width=\"0.8\"/>",
            N(x),
            N(y - 1.2 * r),
            N(x + r),
            N(y),
            N(x),
            N(y + 1.2 * r),
            N(x - r),
            N(y)
        ),
        // Hollow circle.
        MarkerKind::Cleared => w!(
            out,
            "<circle cx=\"{}\" cy=\"{}\" r=\"{}\" fill=\"#fff\" stroke=\"{c}\" stroke-width=\"2\"/>",
            N(x),
            N(y),
            N(0.8 * r)
        ),
        // Square.
        MarkerKind::Operator => w!(
            out,
            "<rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" fill=\"{c}\" stroke=\"#fff\" stroke-width=\"0.8\"/>",
            N(x - 0.8 * r),
            N(y - 0.8 * r),
            N(1.6 * r),
            N(1.6 * r)
        ),
    }
}

/// Markers inside the time range, sorted by time (stable), numbered from 1.
fn shown_markers<'a>(markers: &'a [Marker], ts: &TimeScale) -> Vec<&'a Marker> {
    let mut v: Vec<&Marker> = markers
        .iter()
        .filter(|m| sane_t(m.t_ms) && ts.contains(m.t_ms))
        .collect();
    v.sort_by_key(|m| m.t_ms);
    v
}

/// The markers as vertical lines with a shape at the top, each in a
/// `<g class="marker KIND">` with a `<title>` (and its number when `numbered`).
fn draw_markers(
    out: &mut String,
    shown: &[&Marker],
    ta: &TimeAxis,
    area: Area,
    r: f64,
    numbered: bool,
) {
    let zone = ta.tz.name();
    for (i, m) in shown.iter().enumerate() {
        let x = ta.scale.x(m.t_ms);
        let kind = m.kind;
        let number = if numbered {
            format!("{}. ", i + 1)
        } else {
            String::new()
        };
        w!(
            out,
            "<g class=\"marker {}\" data-n=\"{}\"><title>{number}{} {zone}: {} {}</title>",
            kind.class(),
            i + 1,
            ta.datetime(m.t_ms),
            Esc(&m.source),
            Esc(&m.label)
        );
        w!(
            out,
            "<line x1=\"{x}\" y1=\"{}\" x2=\"{x}\" y2=\"{}\" stroke=\"{}\" stroke-width=\"{}\"{}/>",
            N(area.y0),
            N(area.y1),
            kind.colour(),
            if kind == MarkerKind::Alarm {
                "1.5"
            } else {
                "1"
            },
            dash_attr(kind.dash()),
            x = N(x)
        );
        marker_shape(out, kind, x, area.y0, r);
        out.push_str("</g>");
    }
}

/// Font size of the marker numbers above the approach chart.
const NUMBER_FONT: f64 = 9.0;
/// Height of one lane of marker numbers.
const LANE_H: f64 = 14.0;
/// Lanes of marker numbers at most; closer markers share a box ("3–5").
const MAX_LANES: usize = 3;
/// A number box may sit at most this far (px) beside its markers.
const MAX_SHIFT_PX: f64 = 24.0;
/// Free space between two number boxes in a lane (px).
const BOX_GAP: f64 = 2.0;
/// Events listed under the chart at most; the rest are counted.
const EVENT_ROWS_MAX: usize = 40;
/// Height of one row of the event list.
const EVENT_ROW_H: f64 = 14.0;

/// A numbered box above the approach chart for one marker, or for a run of markers close
/// in time ("3–5").
#[derive(Clone, Debug, PartialEq)]
struct NumberBox {
    /// First and last marker number (from 1, time order).
    first: usize,
    last: usize,
    /// The markers' x extent (px).
    mx0: f64,
    mx1: f64,
    /// Box left and right (px) and lane (0 next to the chart).
    x0: f64,
    x1: f64,
    lane: usize,
}

impl NumberBox {
    fn text(&self) -> String {
        number_text(self.first, self.last)
    }
}

fn number_text(first: usize, last: usize) -> String {
    if first == last {
        first.to_string()
    } else {
        format!("{first}–{last}")
    }
}

/// Number boxes for markers at `xs` (px, ascending) inside [lo, hi], with the lane count.
/// Boxes never overlap and never leave [lo, hi]: first each marker gets its own box, in the
/// lowest lane where it fits at (or at most [`MAX_SHIFT_PX`] beside) its marker; where that
/// fails, markers closer than a growing distance share a box, until everything fits.
fn number_boxes(xs: &[f64], lo: f64, hi: f64) -> (Vec<NumberBox>, usize) {
    if xs.is_empty() || hi <= lo {
        return (Vec::new(), 0);
    }
    let mut merge_px = 0.0;
    while merge_px <= 2.0 * (hi - lo) {
        if let Some(found) = place_numbers(xs, lo, hi, merge_px) {
            return found;
        }
        merge_px = if merge_px == 0.0 { 4.0 } else { merge_px * 2.0 };
    }
    // One box for everything (reached only when a single box cannot fit either).
    let text = number_text(1, xs.len());
    let w = (text_width(&text, NUMBER_FONT) + 6.0).min(hi - lo);
    let (mx0, mx1) = (xs[0], xs[xs.len() - 1]);
    let x0 = (0.5 * (mx0 + mx1) - 0.5 * w).clamp(lo, hi - w);
    (
        vec![NumberBox {
            first: 1,
            last: xs.len(),
            mx0,
            mx1,
            x0,
            x1: x0 + w,
            lane: 0,
        }],
        1,
    )
}

/// One attempt of [`number_boxes`]: markers within `merge_px` of a run's first marker share
/// its box. `None` when a box finds no place.
fn place_numbers(xs: &[f64], lo: f64, hi: f64, merge_px: f64) -> Option<(Vec<NumberBox>, usize)> {
    let mut runs: Vec<(usize, usize)> = Vec::new();
    let mut start = 0;
    for i in 1..xs.len() {
        if xs[i] - xs[start] > merge_px {
            runs.push((start, i - 1));
            start = i;
        }
    }
    runs.push((start, xs.len() - 1));
    let mut lane_right: Vec<f64> = Vec::new();
    let mut boxes = Vec::with_capacity(runs.len());
    for (a, b) in runs {
        let text = number_text(a + 1, b + 1);
        let w = text_width(&text, NUMBER_FONT) + 6.0;
        if w > hi - lo {
            return None;
        }
        let ideal = (0.5 * (xs[a] + xs[b]) - 0.5 * w).clamp(lo, hi - w);
        // The lowest lane where the box fits where it belongs; else a new lane; else the
        // lane where it moves least.
        let mut exact = None;
        let mut shifted: Option<(usize, f64)> = None;
        for (l, &right) in lane_right.iter().enumerate() {
            let left = ideal.max(right + BOX_GAP);
            if left + w > hi {
                continue;
            }
            if left - ideal < 0.05 {
                exact = Some((l, left));
                break;
            }
            if shifted.is_none_or(|(_, s)| left < s) {
                shifted = Some((l, left));
            }
        }
        let (lane, left) = match (exact, shifted) {
            (Some(e), _) => e,
            _ if lane_right.len() < MAX_LANES => {
                lane_right.push(f64::NEG_INFINITY);
                (lane_right.len() - 1, ideal)
            }
            (None, Some((l, left))) if left - ideal <= MAX_SHIFT_PX => (l, left),
            _ => return None,
        };
        lane_right[lane] = left + w;
        boxes.push(NumberBox {
            first: a + 1,
            last: b + 1,
            mx0: xs[a],
            mx1: xs[b],
            x0: left,
            x1: left + w,
            lane,
        });
    }
    Some((boxes, lane_right.len()))
}

/// Height of the strip of marker numbers above the approach chart for `lanes` lanes.
fn number_strip_h(lanes: usize) -> f64 {
    if lanes == 0 {
        0.0
    } else {
        lanes as f64 * LANE_H + 8.0
    }
}

/// The number boxes above `area` (`<g id="marker-numbers">`, each `g.number-box` with a
/// `rect` and its `text`), with a thin leader from each box to its markers.
fn draw_number_boxes(out: &mut String, boxes: &[NumberBox], shown: &[&Marker], area: Area) {
    out.push_str("<g id=\"marker-numbers\">");
    for b in boxes {
        let top = area.y0 - 8.0 - (b.lane + 1) as f64 * LANE_H;
        let (h, cx) = (LANE_H - 2.0, 0.5 * (b.x0 + b.x1));
        // The colour of the box's first marker (meaning is also in the list and shapes).
        let colour = shown
            .get(b.first.saturating_sub(1))
            .map_or(C_TEXT, |m| m.kind.colour());
        w!(
            out,
            "<g class=\"number-box\" data-first=\"{}\" data-last=\"{}\">",
            b.first,
            b.last
        );
        // Leader: from the box down to the middle of its markers (and along them when several).
        w!(
            out,
            "<path d=\"M{},{} L{},{}",
            N(cx),
            N(top + h),
            N(0.5 * (b.mx0 + b.mx1)),
            N(area.y0 - 6.0)
        );
        if b.mx1 - b.mx0 > 1.0 {
            w!(out, " M{},{} H{}", N(b.mx0), N(area.y0 - 6.0), N(b.mx1));
        }
        w!(
            out,
            "\" stroke=\"{C_MUTED}\" stroke-width=\"0.8\" fill=\"none\"/>"
        );
        w!(
            out,
            "<rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" rx=\"2\" fill=\"#fff\" stroke=\"{colour}\" stroke-width=\"1\"/>\
             <text x=\"{}\" y=\"{}\" text-anchor=\"middle\" font-size=\"{NUMBER_FONT}\" font-weight=\"bold\" fill=\"{C_TEXT}\">{}</text></g>",
            N(b.x0),
            N(top),
            N(b.x1 - b.x0),
            N(h),
            N(cx),
            N(top + h - 3.0),
            Esc(&b.text())
        );
    }
    out.push_str("</g>");
}

/// Rows the event list under the chart takes for `n` shown markers (two columns).
fn event_list_rows(n: usize) -> usize {
    let listed = n.min(EVENT_ROWS_MAX);
    listed.div_ceil(2) + usize::from(n > EVENT_ROWS_MAX)
}

/// Height of the event list (heading included) for `n` shown markers.
fn event_list_h(n: usize) -> f64 {
    if n == 0 {
        0.0
    } else {
        24.0 + event_list_rows(n) as f64 * EVENT_ROW_H + 6.0
    }
}

/// `s` cut (with "…") so that it fits in `max_px` at `size` px.
fn fit_text(s: &str, size: f64, max_px: f64) -> String {
    if text_width(s, size) <= max_px {
        return s.to_string();
    }
    let mut t = String::new();
    for c in s.chars() {
        let mut next = t.clone();
        next.push(c);
        next.push('…');
        if text_width(&next, size) > max_px {
            break;
        }
        t.push(c);
    }
    t.push('…');
    t
}

/// Column offsets inside one column of the event list: number (right-aligned), time, who,
/// what; and the width of the whole column.
const EV_COL_W: f64 = 484.0;
const EV_N_RIGHT: f64 = 30.0;
const EV_TIME_X: f64 = 36.0;
const EV_WHO_X: f64 = 138.0;
const EV_WHAT_X: f64 = 300.0;
const EV_FONT: f64 = 10.0;

/// The numbered list of events under the chart (`<g id="events">`, one `g.event-row` per
/// event with its number in `data-n`), in two columns, times in the axis's zone.
fn draw_event_list(out: &mut String, shown: &[&Marker], ta: &TimeAxis, y0: f64) {
    out.push_str("<g id=\"events\">");
    if shown.is_empty() {
        out.push_str("</g>");
        return;
    }
    w!(
        out,
        "<text class=\"chart-title\" x=\"16\" y=\"{}\" font-size=\"12\" font-weight=\"bold\" fill=\"{C_TEXT}\">\
         Events (numbers as on the chart; times {})</text>",
        N(y0 + 14.0),
        Esc(&ta.tz.name())
    );
    let listed = shown.len().min(EVENT_ROWS_MAX);
    let per_col = listed.div_ceil(2);
    for (i, m) in shown.iter().take(listed).enumerate() {
        let (col, row) = (i / per_col.max(1), i % per_col.max(1));
        let x = 16.0 + col as f64 * EV_COL_W;
        let y = y0 + 24.0 + (row + 1) as f64 * EVENT_ROW_H - 3.0;
        w!(
            out,
            "<g class=\"event-row {}\" data-n=\"{}\" font-size=\"{EV_FONT}\" fill=\"{C_TEXT}\">",
            m.kind.class(),
            i + 1
        );
        marker_shape(out, m.kind, x + 4.0, y - 3.5, 3.5);
        w!(
            out,
            "<text x=\"{}\" y=\"{}\" text-anchor=\"end\" font-weight=\"bold\">{}</text>\
             <text x=\"{}\" y=\"{}\">{}</text><text x=\"{}\" y=\"{}\">{}</text><text x=\"{}\" y=\"{}\">{}</text></g>",
            N(x + EV_N_RIGHT),
            N(y),
            i + 1,
            N(x + EV_TIME_X),
            N(y),
            ta.datetime(m.t_ms),
            N(x + EV_WHO_X),
            N(y),
            Esc(&fit_text(&m.source, EV_FONT, EV_WHAT_X - EV_WHO_X - 8.0)),
            N(x + EV_WHAT_X),
            N(y),
            Esc(&fit_text(&m.label, EV_FONT, EV_COL_W - EV_WHAT_X - 12.0))
        );
    }
    if shown.len() > listed {
        w!(
            out,
            "<text class=\"note\" x=\"16\" y=\"{}\" font-size=\"{EV_FONT}\" fill=\"{C_MUTED}\">\
             … and {} more event{} (numbers {}–{}); every event is in the results</text>",
            N(y0 + 24.0 + (per_col + 1) as f64 * EVENT_ROW_H - 3.0),
            shown.len() - listed,
            if shown.len() - listed == 1 { "" } else { "s" },
            listed + 1,
            shown.len()
        );
    }
    out.push_str("</g>");
}

// ---------------------------------------------------------------------------------------------
// Legend
// ---------------------------------------------------------------------------------------------

/// What a legend entry shows before its text.
#[derive(Clone, Copy)]
enum Swatch {
    Line {
        colour: &'static str,
        dash: &'static str,
        width: f64,
    },
    Band(&'static str, f64),
    Hollow(&'static str),
    Marker(MarkerKind),
    /// The off-line hatch.
    Hatch,
    /// An aggregate point: filled (in the trend fit) or hollow.
    Square(bool),
}

struct LegendItem {
    swatch: Swatch,
    text: String,
}

fn legend_item(swatch: Swatch, text: impl Into<String>) -> LegendItem {
    LegendItem {
        swatch,
        text: text.into(),
    }
}

/// Places entries left to right from `x0`, wrapping before `x1`; returns (x, baseline y) per
/// entry and the number of rows.
fn legend_layout(items: &[LegendItem], x0: f64, x1: f64, y: f64) -> (Vec<(f64, f64)>, usize) {
    let mut pos = Vec::with_capacity(items.len());
    let (mut x, mut row) = (x0, 0usize);
    for it in items {
        let wdt = 26.0 + text_width(&it.text, 11.0) + 16.0;
        if x > x0 && x + wdt > x1 {
            x = x0;
            row += 1;
        }
        pos.push((x, y + 16.0 * row as f64));
        x += wdt;
    }
    (pos, if items.is_empty() { 0 } else { row + 1 })
}

fn draw_legend_items(out: &mut String, items: &[LegendItem], pos: &[(f64, f64)]) {
    for (it, &(x, y)) in items.iter().zip(pos) {
        out.push_str("<g class=\"legend-item\">");
        let sy = y - 4.0;
        match it.swatch {
            Swatch::Line {
                colour,
                dash,
                width,
            } => w!(
                out,
                "<line x1=\"{}\" y1=\"{}\" x2=\"{}\" y2=\"{}\" stroke=\"{colour}\" stroke-width=\"{width}\"{}/>",
                N(x),
                N(sy),
                N(x + 22.0),
                N(sy),
                dash_attr(dash)
            ),
            Swatch::Band(fill, opacity) => w!(
                out,
                "<rect x=\"{}\" y=\"{}\" width=\"22\" height=\"10\" fill=\"{fill}\" fill-opacity=\"{opacity}\"/>",
                N(x),
                N(sy - 5.0)
            ),
            Swatch::Hollow(colour) => w!(
                out,
                "<circle cx=\"{}\" cy=\"{}\" r=\"3\" fill=\"#fff\" stroke=\"{colour}\" stroke-width=\"1.3\"/>",
                N(x + 11.0),
                N(sy)
            ),
            Swatch::Hatch => w!(
                out,
                "<rect x=\"{}\" y=\"{}\" width=\"22\" height=\"10\" fill=\"url(#hatch-offline)\" stroke=\"{C_OFFLINE}\" stroke-opacity=\"0.5\"/>",
                N(x),
                N(sy - 5.0)
            ),
            Swatch::Square(filled) => aggregate_shape(out, x + 11.0, sy, filled),
            Swatch::Marker(kind) => {
                w!(
                    out,
                    "<line x1=\"{}\" y1=\"{}\" x2=\"{}\" y2=\"{}\" stroke=\"{}\"{}/>",
                    N(x + 11.0),
                    N(sy - 6.0),
                    N(x + 11.0),
                    N(sy + 6.0),
                    kind.colour(),
                    dash_attr(kind.dash())
                );
                marker_shape(out, kind, x + 11.0, sy, 4.5);
            }
        }
        w!(
            out,
            "<text x=\"{}\" y=\"{}\" fill=\"{C_TEXT}\">{}</text></g>",
            N(x + 26.0),
            N(y),
            Esc(&it.text)
        );
    }
}

// ---------------------------------------------------------------------------------------------
// Preparing a reactor's data
// ---------------------------------------------------------------------------------------------

/// Points with a plottable time, sorted by time (stable).
fn sorted_points(points: &[PlotPoint]) -> Vec<&PlotPoint> {
    let mut v: Vec<&PlotPoint> = points.iter().filter(|p| sane_t(p.t_ms)).collect();
    v.sort_by_key(|p| p.t_ms);
    v
}

/// A projection point with every value usable; `lo ≤ hi`.
#[derive(Clone, Copy, Debug)]
struct ProjPt {
    t: i64,
    fit: f64,
    lo: f64,
    hi: f64,
}

fn projection_points(pr: &Projection) -> Vec<ProjPt> {
    let mut v: Vec<ProjPt> = pr
        .points
        .iter()
        .filter(|&&(t, f, a, b)| sane_t(t) && usable(f) && usable(a) && usable(b))
        .map(|&(t, fit, a, b)| ProjPt {
            t,
            fit,
            lo: a.min(b),
            hi: a.max(b),
        })
        .collect();
    v.sort_by_key(|p| p.t);
    v
}

/// The part of a projection inside [t0, t1], with points interpolated on the bounds.
fn clip_projection(v: &[ProjPt], t0: i64, t1: i64) -> Vec<ProjPt> {
    let lerp = |p: ProjPt, q: ProjPt, t: i64| {
        let f = (t as f64 - p.t as f64) / (q.t as f64 - p.t as f64);
        ProjPt {
            t,
            fit: p.fit + f * (q.fit - p.fit),
            lo: p.lo + f * (q.lo - p.lo),
            hi: p.hi + f * (q.hi - p.hi),
        }
    };
    let mut out = Vec::new();
    for (i, &p) in v.iter().enumerate() {
        if i > 0 {
            let q = v[i - 1];
            for bound in [t0, t1] {
                if q.t < bound && p.t > bound {
                    out.push(lerp(q, p, bound));
                }
            }
        }
        if (t0..=t1).contains(&p.t) {
            out.push(p);
        }
    }
    out
}

/// The time range of a reactor chart, and the end of run when the range could not reach it.
struct Domain {
    t0: i64,
    t1: i64,
    /// Last data time (the trend becomes a projection after it).
    data_end: i64,
}

fn reactor_domain(p: &ReactorPlot, pts: &[&PlotPoint], proj: &[ProjPt]) -> Option<Domain> {
    let (d0, d1) = match (pts.first(), pts.last()) {
        (Some(a), Some(b)) => (a.t_ms, b.t_ms),
        _ => {
            // No evaluations: show whatever else has a time, or nothing.
            let times = p
                .markers
                .iter()
                .map(|m| m.t_ms)
                .chain(p.baselines.iter().flat_map(|b| [b.from_ms, b.to_ms]))
                .chain(proj.iter().map(|q| q.t))
                .filter(|&t| sane_t(t));
            let (mut lo, mut hi) = (None::<i64>, None::<i64>);
            for t in times {
                lo = Some(lo.map_or(t, |v| v.min(t)));
                hi = Some(hi.map_or(t, |v| v.max(t)));
            }
            let (lo, hi) = (lo?, hi?);
            return Some(Domain {
                t0: lo,
                t1: hi,
                data_end: hi,
            });
        }
    };
    let mut want_end = d1;
    if let Some(pr) = &p.projection {
        if let Some(e) = pr.end_of_run_ms.filter(|&e| sane_t(e)) {
            want_end = want_end.max(e);
        }
        if let Some(last) = proj.last() {
            want_end = want_end.max(last.t);
        }
    }
    let cap_end = d1 + (d1 - d0).max(2 * DAY_MS) / PROJECTION_DIVISOR;
    let mut t1 = want_end.min(cap_end).max(d1);
    if t1 > d1 {
        // Room after the end of run so that its line does not sit on the frame.
        t1 += (t1 - d0) / 50;
    }
    Some(Domain {
        t0: d0,
        t1,
        data_end: d1,
    })
}

// ---------------------------------------------------------------------------------------------
// reactor_svg
// ---------------------------------------------------------------------------------------------

/// One SVG document for one reactor, times in UTC: see [`reactor_svg_tz`].
pub fn reactor_svg(p: &ReactorPlot) -> String {
    reactor_svg_tz(p, TimeZone::UTC)
}

/// Widest tick label of an axis (px at 11 px).
fn tick_label_w(axis: &Axis) -> f64 {
    axis.ticks
        .iter()
        .map(|(_, t)| text_width(t, 11.0))
        .fold(0.0, f64::max)
}

/// Left edge of the plot areas: room for the widest tick label, a gap, and the rotated
/// axis title (never less than [`LEFT`]).
fn left_for(label_w: f64) -> f64 {
    LEFT.max((5.0 + label_w + 8.0 + 12.0 + 6.0).ceil())
}

/// One SVG document for one reactor: the approach to equilibrium (top) and the key component,
/// measured and at equilibrium (bottom), on a shared time axis labelled in `tz`; numbered
/// event markers with their list under the charts. 1000 px wide, 640 px high plus the room
/// that marker numbers and the event list take.
pub fn reactor_svg_tz(p: &ReactorPlot, tz: TimeZone) -> String {
    let mut out = String::with_capacity(96 * 1024);
    let pts = sorted_points(&p.points);
    let proj_all = p
        .projection
        .as_ref()
        .map(projection_points)
        .unwrap_or_default();
    let domain = reactor_domain(p, &pts, &proj_all);
    let key = if p.key_component.trim().is_empty() {
        "key component"
    } else {
        p.key_component.as_str()
    };
    let title = if p.title.trim().is_empty() {
        p.reactor.as_str()
    } else {
        p.title.as_str()
    };
    let basis = p
        .key_basis
        .as_deref()
        .map(str::trim)
        .filter(|b| !b.is_empty());

    // Left margin from the widest tick label of either chart (same for both).
    let left = match &domain {
        Some(d) => {
            let ts = TimeScale::new(d.t0, d.t1, LEFT, RIGHT);
            let proj = clip_projection(&proj_all, ts.t0, ts.t1);
            let a = approach_y_range(p, &pts, &proj, &ts)
                .map_or(0.0, |(lo, hi)| tick_label_w(&linear_axis(lo, hi, 6)));
            let k = key_axis(&key_values(&pts)).map_or(0.0, |(_, _, ax)| tick_label_w(&ax));
            left_for(a.max(k))
        }
        None => LEFT,
    };
    let ta = domain
        .as_ref()
        .map(|d| time_axis(TimeScale::new(d.t0, d.t1, left, RIGHT), tz));
    let shown: Vec<&Marker> = ta
        .as_ref()
        .map(|ta| shown_markers(&p.markers, &ta.scale))
        .unwrap_or_default();
    let xs: Vec<f64> = match &ta {
        Some(ta) => shown.iter().map(|m| ta.scale.x(m.t_ms)).collect(),
        None => Vec::new(),
    };
    let (boxes, lanes) = number_boxes(&xs, 0.0 + 4.0, WIDTH - 4.0);
    let strip = number_strip_h(lanes);
    let list_h = event_list_h(shown.len());
    let height = (HEIGHT + strip + list_h).ceil();

    w!(
        out,
        "<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"{w}\" height=\"{h}\" viewBox=\"0 0 {w} {h}\" \
         font-family=\"sans-serif\" font-size=\"11\" role=\"img\" aria-labelledby=\"svg-title svg-desc\">",
        w = WIDTH,
        h = height
    );
    w!(out, "<title id=\"svg-title\">{}</title>", Esc(title));
    w!(
        out,
        "<desc id=\"svg-desc\">advisory: not a safety function. Approach to equilibrium of reactor {} \
         and its key component {}, measured and at equilibrium{}.</desc>",
        Esc(&p.reactor),
        Esc(key),
        basis.map_or(String::new(), |b| format!(" ({} basis)", Esc(b)))
    );

    // Legend first (its height sets where the top chart starts); drawn at the end.
    let items = approach_legend(p, &pts, &proj_all);
    let (legend_pos, rows) = legend_layout(&items, left, RIGHT, 44.0);
    let heading_y = 44.0 + 16.0 * rows.max(1) as f64 + 4.0;
    let dy = strip;
    let top = Area {
        x0: left,
        y0: heading_y + 10.0 + strip,
        x1: RIGHT,
        y1: 370.0 + dy,
    };
    let bottom = Area {
        x0: left,
        y0: 420.0 + dy,
        x1: RIGHT,
        y1: 578.0 + dy,
    };
    let key_items = vec![
        legend_item(
            Swatch::Line {
                colour: C_MEASURED,
                dash: "",
                width: 1.6,
            },
            format!("{key} measured"),
        ),
        legend_item(
            Swatch::Line {
                colour: C_EQUILIBRIUM,
                dash: DASH_EQUILIBRIUM,
                width: 1.6,
            },
            format!("{key} at equilibrium"),
        ),
    ];
    let key_heading = match basis {
        Some(b) => format!("{key} ({b} basis): measured and at equilibrium"),
        None => format!("{key}: measured and at equilibrium"),
    };
    // Bold heading text is wider than plain text.
    let key_legend_x = (left + 1.1 * text_width(&key_heading, 13.0) + 24.0).min(RIGHT - 300.0);
    let (key_pos, _) = legend_layout(&key_items, key_legend_x, RIGHT, 410.0 + dy);

    out.push_str("<defs>");
    clip_rect(&mut out, "clip-approach", top);
    clip_rect(&mut out, "clip-key", bottom);
    w!(
        out,
        "<pattern id=\"hatch-offline\" width=\"6\" height=\"6\" patternUnits=\"userSpaceOnUse\" \
         patternTransform=\"rotate(45)\"><rect width=\"6\" height=\"6\" fill=\"{C_OFFLINE}\" fill-opacity=\"0.12\"/>\
         <line x1=\"0\" y1=\"0\" x2=\"0\" y2=\"6\" stroke=\"{C_OFFLINE}\" stroke-width=\"1.6\" stroke-opacity=\"0.45\"/></pattern>"
    );
    out.push_str("</defs>");
    w!(
        out,
        "<rect width=\"{}\" height=\"{}\" fill=\"#fff\"/>",
        WIDTH,
        height
    );
    w!(
        out,
        "<text class=\"title\" x=\"16\" y=\"24\" font-size=\"16\" font-weight=\"bold\" fill=\"{C_TEXT}\">{}</text>",
        Esc(title)
    );
    w!(
        out,
        "<text class=\"chart-title\" x=\"{}\" y=\"{}\" font-size=\"13\" font-weight=\"bold\" fill=\"{C_TEXT}\">Approach to equilibrium</text>",
        N(left),
        N(heading_y)
    );
    w!(
        out,
        "<text class=\"chart-title\" x=\"{}\" y=\"{}\" font-size=\"13\" font-weight=\"bold\" fill=\"{C_TEXT}\">{}</text>",
        N(left),
        N(410.0 + dy),
        Esc(&key_heading)
    );

    let caption_y = 612.0 + dy;
    match (&domain, &ta) {
        (Some(d), Some(ta)) => {
            approach_chart(&mut out, p, &pts, &proj_all, d, ta, top, &shown);
            draw_number_boxes(&mut out, &boxes, &shown, top);
            key_chart(&mut out, p, &pts, key, basis, ta, bottom);
            w!(
                out,
                "<text class=\"axis-label\" x=\"{}\" y=\"{}\" text-anchor=\"middle\" font-size=\"12\" fill=\"{C_TEXT}\">{}</text>",
                N(bottom.mid_x()),
                N(caption_y),
                Esc(&ta.caption)
            );
            draw_event_list(&mut out, &shown, ta, caption_y + 8.0);
        }
        _ => {
            for id in [
                "offline",
                "gaps",
                "uncertainty",
                "baseline",
                "projection",
                "trend",
                "limit",
                "alarm-limits",
                "approach",
                "aggregates",
                "uncertain-quality",
                "end-of-run",
                "markers",
                "marker-numbers",
                "events",
            ] {
                w!(out, "<g id=\"{id}\"/>");
            }
            out.push_str(
                "<g id=\"key-offline\"/><g id=\"key-measured\"/><g id=\"key-equilibrium\"/>",
            );
            draw_frame(&mut out, top);
            draw_message(&mut out, top, "no data");
            draw_frame(&mut out, bottom);
            draw_message(&mut out, bottom, "no data");
            w!(
                out,
                "<text class=\"axis-label\" x=\"{}\" y=\"{}\" text-anchor=\"middle\" font-size=\"12\" fill=\"{C_TEXT}\">time ({})</text>",
                N(bottom.mid_x()),
                N(caption_y),
                Esc(&tz.name())
            );
        }
    }

    w!(
        out,
        "<text class=\"footer\" x=\"16\" y=\"{}\" font-size=\"10\" fill=\"{C_MUTED}\">advisory: not a safety function. \
         eqwatch{}{}</text>",
        N(height - 8.0),
        if p.reactor.is_empty() {
            ""
        } else {
            ", reactor "
        },
        Esc(&p.reactor)
    );
    out.push_str("<g id=\"legend\">");
    draw_legend_items(&mut out, &items, &legend_pos);
    draw_legend_items(&mut out, &key_items, &key_pos);
    out.push_str("</g></svg>\n");
    out
}

/// Legend entries of the approach chart: only what the chart has.
fn approach_legend(p: &ReactorPlot, pts: &[&PlotPoint], proj: &[ProjPt]) -> Vec<LegendItem> {
    let mut v = vec![legend_item(
        Swatch::Line {
            colour: C_APPROACH,
            dash: "",
            width: 1.8,
        },
        "approach",
    )];
    if pts.iter().any(|q| q.uncertainty_k.is_some_and(usable)) {
        v.push(legend_item(Swatch::Band(C_BAND, 0.35), "± uncertainty"));
    }
    if pts
        .iter()
        .any(|q| !q.good && q.approach_k.is_some_and(usable))
    {
        v.push(legend_item(Swatch::Hollow(C_APPROACH), "uncertain quality"));
    }
    if pts.iter().any(|q| !q.approach_k.is_some_and(usable)) {
        v.push(legend_item(Swatch::Band(C_GAP, 0.3), "bad quality (gap)"));
    }
    if p.offline
        .iter()
        .any(|o| sane_t(o.from_ms) && sane_t(o.to_ms))
    {
        v.push(legend_item(Swatch::Hatch, "unit off line"));
    }
    if p.baselines.iter().any(|b| usable(b.approach_k)) {
        v.push(legend_item(
            Swatch::Line {
                colour: C_BASELINE,
                dash: DASH_BASELINE,
                width: 1.6,
            },
            "baseline",
        ));
    }
    if !proj.is_empty() {
        v.push(legend_item(
            Swatch::Line {
                colour: C_TREND,
                dash: DASH_TREND,
                width: 1.6,
            },
            "trend",
        ));
        v.push(legend_item(
            Swatch::Line {
                colour: C_TREND,
                dash: DASH_FORWARD,
                width: 1.6,
            },
            "projection",
        ));
        v.push(legend_item(
            Swatch::Band(C_PROJ_BAND, 0.3),
            "prediction band",
        ));
    }
    let aggs = || p.aggregates.iter().filter(|a| usable(a.approach_k));
    let mean = aggregate_name(p.aggregate_period_ms);
    if aggs().any(|a| a.in_fit) {
        v.push(legend_item(
            Swatch::Square(true),
            format!("{mean} (trend fit)"),
        ));
    }
    if aggs().any(|a| !a.in_fit) {
        v.push(legend_item(
            Swatch::Square(false),
            format!("{mean} (not in fit)"),
        ));
    }
    if p.limit_k.is_some_and(usable) {
        v.push(legend_item(
            Swatch::Line {
                colour: C_LIMIT,
                dash: DASH_LIMIT,
                width: 1.6,
            },
            "end-of-run limit",
        ));
    }
    if p.alarm_limits.iter().any(|a| usable(a.limit_k)) {
        v.push(legend_item(
            Swatch::Line {
                colour: C_ALARM_LIMIT,
                dash: DASH_ALARM_LIMIT,
                width: 1.4,
            },
            "operator alarm limit",
        ));
    }
    if p.projection
        .as_ref()
        .is_some_and(|pr| pr.end_of_run_ms.is_some())
    {
        v.push(legend_item(
            Swatch::Line {
                colour: C_END_OF_RUN,
                dash: DASH_END_OF_RUN,
                width: 1.4,
            },
            "end of run",
        ));
    }
    for kind in MarkerKind::ALL {
        if p.markers.iter().any(|m| m.kind == kind) {
            v.push(legend_item(Swatch::Marker(kind), kind.class()));
        }
    }
    v
}

/// The y range of the approach chart: approach values, baselines, trend and limit set it;
/// uncertainty and prediction bands may widen it by at most half of that range.
fn approach_y_range(
    p: &ReactorPlot,
    pts: &[&PlotPoint],
    proj: &[ProjPt],
    ts: &TimeScale,
) -> Option<(f64, f64)> {
    let baselines = p.baselines.iter().filter(|b| {
        usable(b.approach_k) && b.from_ms.min(b.to_ms) <= ts.t1 && b.from_ms.max(b.to_ms) >= ts.t0
    });
    let core = pts
        .iter()
        .filter_map(|q| q.approach_k)
        .chain(baselines.clone().map(|b| b.approach_k))
        .chain(proj.iter().map(|q| q.fit))
        .chain(p.limit_k)
        .chain(p.alarm_limits.iter().map(|a| a.limit_k))
        .filter(|v| usable(*v));
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for v in core {
        lo = lo.min(v);
        hi = hi.max(v);
    }
    if lo > hi {
        return None;
    }
    if lo >= 0.0 && lo <= 0.5 * hi {
        lo = 0.0;
    }
    let span = (hi - lo).max(hi.abs().max(lo.abs()) * 0.1).max(1.0);
    let (elo, ehi) = (lo - 0.5 * span, hi + 0.5 * span);
    let extras = pts
        .iter()
        .filter_map(|q| match (q.approach_k, q.uncertainty_k) {
            (Some(a), Some(u)) if usable(a) && usable(u) => Some([a - u.abs(), a + u.abs()]),
            _ => None,
        })
        .flatten()
        .chain(baselines.filter_map(|b| {
            b.sigma_k
                .filter(|s| usable(*s))
                .map(|s| b.approach_k + s.abs())
        }))
        .chain(proj.iter().flat_map(|q| [q.lo, q.hi]));
    for v in extras.filter(|v| usable(*v)) {
        lo = lo.min(v.max(elo));
        hi = hi.max(v.min(ehi));
    }
    Some((lo, hi))
}

/// The top chart. Groups are always written (possibly empty) so that the structure is stable.
#[allow(clippy::too_many_arguments)]
fn approach_chart(
    out: &mut String,
    p: &ReactorPlot,
    pts: &[&PlotPoint],
    proj_all: &[ProjPt],
    d: &Domain,
    ta: &TimeAxis,
    area: Area,
    shown: &[&Marker],
) {
    let ts = ta.scale;
    let proj = clip_projection(proj_all, ts.t0, ts.t1);
    let range = approach_y_range(p, pts, &proj, &ts);
    let ys = YScale {
        axis: match range {
            Some((lo, hi)) => linear_axis(lo, hi, 6),
            None => linear_axis(0.0, 1.0, 6),
        },
        top: area.y0,
        bottom: area.y1,
    };
    draw_time_grid(out, area, ta, true);
    offline_group(
        out,
        "id=\"offline\"",
        &p.offline,
        &ts,
        area,
        "clip-approach",
    );
    if range.is_some() {
        draw_y_axis(out, area, &ys, "approach to equilibrium (K)");
    } else {
        let (lx, ly) = (area.x0 - 30.0, area.mid_y());
        w!(
            out,
            "<text class=\"axis-label\" x=\"{}\" y=\"{}\" transform=\"rotate(-90 {} {})\" text-anchor=\"middle\" \
             font-size=\"12\" fill=\"{C_TEXT}\">approach to equilibrium (K)</text>",
            N(lx),
            N(ly),
            N(lx),
            N(ly)
        );
    }

    let samples: Vec<Px> = pts
        .iter()
        .map(|q| {
            let a = q.approach_k.filter(|v| usable(*v));
            let y = if range.is_some() {
                a.and_then(|v| ys.y(v))
            } else {
                None
            };
            let band = match (y, a, q.uncertainty_k.filter(|u| usable(*u))) {
                (Some(_), Some(a), Some(u)) => ys.y(a + u.abs()).zip(ys.y(a - u.abs())),
                _ => None,
            };
            Px {
                x: ts.x(q.t_ms),
                y,
                band,
                env: None,
                good: q.good,
            }
        })
        .collect();
    // A gap is a time without a usable result; a result whose approach is only not
    // meaningful (the key component still measured, as at a methanator) is no gap.
    let has_data: Vec<Px> = samples
        .iter()
        .zip(pts.iter())
        .map(|(px, q)| Px {
            y: px.y.or_else(|| {
                q.key_measured
                    .filter(|k| usable_fraction(*k))
                    .map(|_| area.mid_y())
            }),
            ..*px
        })
        .collect();
    let gaps = gap_spans(&has_data, area);
    let (series, decimated) = drawable(samples, area);
    let clip = "clip-path=\"url(#clip-approach)\"";

    // Bad-quality gaps.
    w!(
        out,
        "<g id=\"gaps\" {clip} fill=\"{C_GAP}\" fill-opacity=\"0.22\">"
    );
    for (a, b) in &gaps {
        w!(
            out,
            "<rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\"/>",
            N(*a),
            N(area.y0),
            N(b - a),
            N(area.h())
        );
    }
    out.push_str("</g>");

    // Uncertainty band.
    let (band, bars) = band_path(&series, |q| q.band);
    w!(out, "<g id=\"uncertainty\" {clip}>");
    if !band.is_empty() {
        w!(
            out,
            "<path class=\"band\" d=\"{band}\" fill=\"{C_BAND}\" fill-opacity=\"0.35\" stroke=\"none\"/>"
        );
    }
    if !bars.is_empty() {
        w!(
            out,
            "<path class=\"bar\" d=\"{bars}\" stroke=\"{C_BAND}\" stroke-width=\"3\" fill=\"none\"/>"
        );
    }
    out.push_str("</g>");

    projection_groups(out, p, &proj, d, &ts, &ys, range.is_some());
    limit_groups(out, p, &ts, &ys, area, range.is_some());

    // Approach line (with envelope when decimated).
    w!(out, "<g id=\"approach\" {clip}>");
    if decimated {
        envelope(out, &series, C_APPROACH, "0.18");
    }
    let (line, isolated) = line_path(&series);
    if !line.is_empty() {
        w!(
            out,
            "<path class=\"line\" d=\"{line}\" fill=\"none\" stroke=\"{C_APPROACH}\" stroke-width=\"1.8\" stroke-linejoin=\"round\"/>"
        );
    }
    let n_valid = series.iter().filter(|q| q.y.is_some()).count();
    for q in &series {
        let Some(y) = q.y else { continue };
        let lone = isolated.contains(&(q.x, y));
        if q.good && (lone || (!decimated && n_valid <= 60)) {
            w!(
                out,
                "<circle class=\"point\" cx=\"{}\" cy=\"{}\" r=\"2.6\" fill=\"{C_APPROACH}\"/>",
                N(q.x),
                N(y)
            );
        }
    }
    out.push_str("</g>");

    // Uncertain quality: hollow circles (per column when decimated).
    w!(
        out,
        "<g id=\"uncertain-quality\" {clip} fill=\"#fff\" stroke=\"{C_APPROACH}\" stroke-width=\"1.3\">"
    );
    for q in series.iter().filter(|q| !q.good) {
        if let Some(y) = q.y {
            w!(out, "<circle cx=\"{}\" cy=\"{}\" r=\"3\"/>", N(q.x), N(y));
        }
    }
    out.push_str("</g>");

    aggregates_group(out, p, &ts, &ys, range.is_some());
    baselines_group(out, p, ta, &ys, area, range.is_some());
    end_of_run_group(out, p, ta, &ys, area, range.is_some());

    out.push_str("<g id=\"markers\">");
    draw_markers(out, shown, ta, area, 5.5, true);
    let outside = p.markers.len() - shown.len();
    if outside > 0 {
        w!(
            out,
            "<text class=\"note\" x=\"{}\" y=\"{}\" text-anchor=\"end\" font-size=\"10\" fill=\"{C_MUTED}\">{} marker{} outside the time range not shown</text>",
            N(area.x1),
            N(area.y1 + 28.0),
            outside,
            if outside == 1 { "" } else { "s" }
        );
    }
    out.push_str("</g>");

    draw_frame(out, area);
    if n_valid == 0 {
        draw_message(
            out,
            area,
            "no approach value (where the equilibrium is below the analyser's detection limit, watch the key component)",
        );
    }
}

fn baselines_group(
    out: &mut String,
    p: &ReactorPlot,
    ta: &TimeAxis,
    ys: &YScale,
    area: Area,
    has_axis: bool,
) {
    let ts = &ta.scale;
    w!(out, "<g id=\"baseline\" clip-path=\"url(#clip-approach)\">");
    for b in p.baselines.iter().filter(|_| has_axis) {
        if !usable(b.approach_k) || !sane_t(b.from_ms) || !sane_t(b.to_ms) {
            continue;
        }
        let (a, z) = (
            b.from_ms.min(b.to_ms).max(ts.t0),
            b.from_ms.max(b.to_ms).min(ts.t1),
        );
        if a > z {
            continue;
        }
        let Some(y) = ys.y(b.approach_k) else {
            continue;
        };
        let (xa, xz) = (ts.x(a), ts.x(z).max(ts.x(a) + 1.0));
        let sigma = b.sigma_k.filter(|s| usable(*s)).map(f64::abs);
        w!(
            out,
            "<g class=\"baseline-span\"><title>baseline {} K{} from {} to {} {}</title>",
            fmt_sig(b.approach_k, 3),
            sigma.map_or(String::new(), |s| format!(" ± {}", fmt_sig(s, 2))),
            ta.datetime(b.from_ms.min(b.to_ms)),
            ta.datetime(b.from_ms.max(b.to_ms)),
            ta.tz.name()
        );
        if let Some((yh, yl)) =
            sigma.and_then(|s| ys.y(b.approach_k + s).zip(ys.y(b.approach_k - s)))
        {
            w!(
                out,
                "<rect class=\"sigma\" x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" fill=\"{C_BASELINE}\" fill-opacity=\"0.12\"/>",
                N(xa),
                N(yh),
                N(xz - xa),
                N(yl - yh)
            );
        }
        w!(
            out,
            "<path class=\"line\" d=\"M{},{} H{}\" stroke=\"{C_BASELINE}\" stroke-width=\"1.8\"{} fill=\"none\"/>",
            N(xa),
            N(y),
            N(xz),
            dash_attr(DASH_BASELINE)
        );
        w!(
            out,
            "<text x=\"{}\" y=\"{}\" font-size=\"10\" fill=\"{C_BASELINE}\" stroke=\"#fff\" stroke-width=\"3\" \
             paint-order=\"stroke\">baseline {} K</text></g>",
            N(xa.max(area.x0) + 3.0),
            N(y - 4.0),
            fmt_sig(b.approach_k, 3)
        );
    }
    out.push_str("</g>");
}

/// `trend` (the fit over the data) and `projection` (prediction band and the fit forward).
fn projection_groups(
    out: &mut String,
    p: &ReactorPlot,
    proj: &[ProjPt],
    d: &Domain,
    ts: &TimeScale,
    ys: &YScale,
    has_axis: bool,
) {
    let to_px = |v: &[ProjPt], band: bool| -> Vec<Px> {
        v.iter()
            .map(|q| Px {
                x: ts.x(q.t),
                y: ys.y(q.fit),
                band: if band {
                    ys.y(q.hi).zip(ys.y(q.lo))
                } else {
                    None
                },
                env: None,
                good: true,
            })
            .collect()
    };
    let clip = "clip-path=\"url(#clip-approach)\"";
    w!(out, "<g id=\"projection\" {clip}>");
    if has_axis && !proj.is_empty() {
        let all = to_px(proj, true);
        let (band, bars) = band_path(&all, |q| q.band);
        if !band.is_empty() {
            w!(
                out,
                "<path class=\"band\" d=\"{band}\" fill=\"{C_PROJ_BAND}\" fill-opacity=\"0.25\" stroke=\"none\"/>"
            );
        }
        if !bars.is_empty() {
            w!(
                out,
                "<path class=\"bar\" d=\"{bars}\" stroke=\"{C_PROJ_BAND}\" stroke-width=\"3\" fill=\"none\"/>"
            );
        }
        let forward = to_px(&clip_projection(proj, d.data_end, ts.t1), false);
        let (line, _) = line_path(&forward);
        if forward.len() > 1 && !line.is_empty() {
            w!(
                out,
                "<path class=\"line\" d=\"{line}\" fill=\"none\" stroke=\"{C_TREND}\" stroke-width=\"1.8\"{}/>",
                dash_attr(DASH_FORWARD)
            );
        }
    }
    out.push_str("</g>");

    w!(out, "<g id=\"trend\">");
    if has_axis && !proj.is_empty() {
        let fit = to_px(&clip_projection(proj, ts.t0, d.data_end), false);
        let (line, _) = line_path(&fit);
        if fit.len() > 1 && !line.is_empty() {
            w!(
                out,
                "<path class=\"line\" d=\"{line}\" {clip} fill=\"none\" stroke=\"{C_TREND}\" stroke-width=\"1.6\"{}/>",
                dash_attr(DASH_TREND)
            );
        }
        if let Some(pr) = p
            .projection
            .as_ref()
            .filter(|pr| usable(pr.slope_k_per_day))
        {
            let s = pr.slope_k_per_day;
            w!(
                out,
                "<text x=\"{}\" y=\"{}\" font-size=\"11\" fill=\"{C_TREND}\" stroke=\"#fff\" stroke-width=\"3\" \
                 paint-order=\"stroke\">trend {}{} K/day</text>",
                N(ts.x0 + 6.0),
                N(ys.top + 14.0),
                if s > 0.0 { "+" } else { "" },
                fmt_sig(s, 3)
            );
        }
    }
    out.push_str("</g>");
}

/// `limit` (the end-of-run limit) and `alarm-limits` (one `g.alarm-limit` per operator
/// alarm, with `data-id` and `data-limit-k`): horizontal lines labelled at the right end;
/// the labels are stacked so that they never overprint each other.
fn limit_groups(
    out: &mut String,
    p: &ReactorPlot,
    ts: &TimeScale,
    ys: &YScale,
    area: Area,
    has_axis: bool,
) {
    // (line y, label text, the alarm; `None` for the end-of-run limit)
    let mut lines: Vec<(f64, String, Option<&AlarmLimit>)> = Vec::new();
    if let Some((l, y)) = p
        .limit_k
        .filter(|l| has_axis && usable(*l))
        .and_then(|l| ys.y(l).map(|y| (l, y)))
    {
        lines.push((y, format!("end-of-run limit {} K", fmt_sig(l, 3)), None));
    }
    for a in p
        .alarm_limits
        .iter()
        .filter(|a| has_axis && usable(a.limit_k))
    {
        if let Some(y) = ys.y(a.limit_k) {
            lines.push((
                y,
                format!(
                    "operator alarm {} ({}) {} K",
                    a.id,
                    if a.high { "high" } else { "low" },
                    fmt_sig(a.limit_k, 3)
                ),
                Some(a),
            ));
        }
    }
    // Labels just below their lines (the end-of-run interval bar sits on the limit line),
    // at least 12 px apart, inside the area.
    let mut order: Vec<usize> = (0..lines.len()).collect();
    order.sort_by(|&i, &j| lines[i].0.total_cmp(&lines[j].0));
    let mut label_y = vec![0.0; lines.len()];
    let mut prev = f64::NEG_INFINITY;
    for &i in &order {
        let y = (lines[i].0 + 13.0).max(prev + 12.0).max(area.y0 + 12.0);
        label_y[i] = y;
        prev = y;
    }
    let mut next = area.y1 - 3.0 + 12.0;
    for &i in order.iter().rev() {
        label_y[i] = label_y[i].min(next - 12.0);
        next = label_y[i];
    }
    // Right-aligned at the right edge, or left of the end-of-run line when that is near it.
    let widest = lines
        .iter()
        .map(|l| text_width(&l.1, 10.0))
        .fold(0.0, f64::max);
    let label_x = p
        .projection
        .as_ref()
        .and_then(|pr| pr.end_of_run_ms)
        .filter(|&e| sane_t(e) && ts.contains(e))
        .map(|e| ts.x(e))
        .filter(|&ex| ex > area.x1 - widest - 8.0 && ex - 6.0 - widest > area.x0)
        .map_or(area.x1 - 4.0, |ex| ex - 6.0);
    let path = |out: &mut String, y: f64, colour: &str, dash: &str, width: &str| {
        w!(
            out,
            "<path class=\"line\" d=\"M{},{} H{}\" stroke=\"{colour}\" stroke-width=\"{width}\"{} fill=\"none\"/>",
            N(area.x0),
            N(y),
            N(area.x1),
            dash_attr(dash)
        );
    };
    let label = |out: &mut String, y: f64, colour: &str, text: &str| {
        w!(
            out,
            "<text x=\"{}\" y=\"{}\" text-anchor=\"end\" font-size=\"10\" fill=\"{colour}\" stroke=\"#fff\" \
             stroke-width=\"3\" paint-order=\"stroke\">{}</text>",
            N(label_x),
            N(y),
            Esc(text)
        );
    };
    out.push_str("<g id=\"limit\">");
    for (i, (y, text, _)) in lines.iter().enumerate().filter(|(_, l)| l.2.is_none()) {
        path(out, *y, C_LIMIT, DASH_LIMIT, "1.6");
        label(out, label_y[i], C_LIMIT, text);
    }
    out.push_str("</g><g id=\"alarm-limits\">");
    for (i, (y, text, alarm)) in lines.iter().enumerate() {
        let Some(a) = alarm else { continue };
        w!(
            out,
            "<g class=\"alarm-limit\" data-id=\"{}\" data-limit-k=\"{}\"><title>operator alarm {}: {} K</title>",
            Esc(&a.id),
            fmt_sig(a.limit_k, 6),
            Esc(&a.id),
            fmt_sig(a.limit_k, 6)
        );
        path(out, *y, C_ALARM_LIMIT, DASH_ALARM_LIMIT, "1.4");
        label(out, label_y[i], C_ALARM_LIMIT, text);
        out.push_str("</g>");
    }
    out.push_str("</g>");
}

/// "daily mean" for one-day aggregates, "6-h mean" and so on, else "period mean".
fn aggregate_name(period_ms: i64) -> String {
    if period_ms > 0 && period_ms % DAY_MS == 0 {
        match period_ms / DAY_MS {
            1 => "daily mean".to_string(),
            7 => "weekly mean".to_string(),
            n => format!("{n}-day mean"),
        }
    } else if period_ms > 0 && period_ms % HOUR_MS == 0 {
        format!("{}-h mean", period_ms / HOUR_MS)
    } else {
        "period mean".to_string()
    }
}

/// The aggregate marker: a small square, filled (in the trend fit) or hollow.
fn aggregate_shape(out: &mut String, x: f64, y: f64, filled: bool) {
    w!(
        out,
        "<rect class=\"aggregate{}\" x=\"{}\" y=\"{}\" width=\"5\" height=\"5\" fill=\"{}\" stroke=\"{C_AGGREGATE}\" stroke-width=\"1\"/>",
        if filled { " in-fit" } else { "" },
        N(x - 2.5),
        N(y - 2.5),
        if filled { C_TREND } else { "#fff" }
    );
}

/// `aggregates`: one `rect.aggregate` per steady-state aggregate inside the time range.
fn aggregates_group(
    out: &mut String,
    p: &ReactorPlot,
    ts: &TimeScale,
    ys: &YScale,
    has_axis: bool,
) {
    out.push_str("<g id=\"aggregates\" clip-path=\"url(#clip-approach)\">");
    for a in &p.aggregates {
        if !has_axis || !usable(a.approach_k) || !sane_t(a.t_ms) || !ts.contains(a.t_ms) {
            continue;
        }
        if let Some(y) = ys.y(a.approach_k) {
            aggregate_shape(out, ts.x(a.t_ms), y, a.in_fit);
        }
    }
    out.push_str("</g>");
}

/// Off-line periods as hatched rectangles over the whole height of `area`, in a `<g>` with
/// the attribute `group` (`id="offline"`), one `rect.offline` per period in the time range.
fn offline_group(
    out: &mut String,
    group: &str,
    spans: &[OfflineSpan],
    ts: &TimeScale,
    area: Area,
    clip: &str,
) {
    w!(out, "<g {group} clip-path=\"url(#{clip})\">");
    for o in spans {
        if !sane_t(o.from_ms) || !sane_t(o.to_ms) {
            continue;
        }
        let (a, b) = (o.from_ms.min(o.to_ms), o.from_ms.max(o.to_ms));
        if b < ts.t0 || a > ts.t1 {
            continue;
        }
        let (xa, xb) = (ts.x(a.max(ts.t0)), ts.x(b.min(ts.t1)));
        let (xa, xb) = if xb - xa < 1.0 {
            let mid = 0.5 * (xa + xb);
            (mid - 0.5, mid + 0.5)
        } else {
            (xa, xb)
        };
        w!(
            out,
            "<rect class=\"offline\" x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" fill=\"url(#hatch-offline)\">\
             <title>unit off line</title></rect>",
            N(xa),
            N(area.y0),
            N(xb - xa),
            N(area.h())
        );
    }
    out.push_str("</g>");
}

fn end_of_run_group(
    out: &mut String,
    p: &ReactorPlot,
    ta: &TimeAxis,
    ys: &YScale,
    area: Area,
    has_axis: bool,
) {
    let ts = ta.scale;
    out.push_str("<g id=\"end-of-run\">");
    let Some(pr) = &p.projection else {
        out.push_str("</g>");
        return;
    };
    let limit_y = p
        .limit_k
        .filter(|l| has_axis && usable(*l))
        .and_then(|l| ys.y(l));
    if let Some((a, b)) = pr.end_of_run_range_ms {
        let (a, b) = (a.min(b), a.max(b));
        let (ca, cb) = (a.max(ts.t0), b.min(ts.t1));
        if ca <= cb {
            let y = limit_y.unwrap_or(area.y0 + 8.0);
            let (xa, xb) = (ts.x(ca), ts.x(cb));
            w!(
                out,
                "<g class=\"range\"><title>end of run between {} and {} {}</title>\
                 <path d=\"M{},{} H{}\" stroke=\"{C_END_OF_RUN}\" stroke-width=\"4\" stroke-opacity=\"0.55\"/>",
                ta.datetime(a),
                ta.datetime(b),
                ta.tz.name(),
                N(xa),
                N(y),
                N(xb)
            );
            // End caps only where the interval really ends inside the chart.
            for (t, x) in [(a, xa), (b, xb)] {
                if ts.contains(t) {
                    w!(
                        out,
                        "<path d=\"M{},{} V{}\" stroke=\"{C_END_OF_RUN}\" stroke-width=\"1.5\"/>",
                        N(x),
                        N(y - 6.0),
                        N(y + 6.0)
                    );
                }
            }
            out.push_str("</g>");
        }
    }
    if let Some(e) = pr.end_of_run_ms {
        if sane_t(e) && ts.contains(e) {
            let x = ts.x(e);
            let label = format!("end of run {}", ta.when(e));
            let right = x + 4.0 + text_width(&label, 11.0) > area.x1;
            w!(
                out,
                "<path class=\"line\" d=\"M{},{} V{}\" stroke=\"{C_END_OF_RUN}\" stroke-width=\"1.4\"{}/>\
                 <text x=\"{}\" y=\"{}\" text-anchor=\"{}\" font-size=\"11\" fill=\"{C_END_OF_RUN}\" stroke=\"#fff\" \
                 stroke-width=\"3\" paint-order=\"stroke\">{}</text>",
                N(x),
                N(area.y0),
                N(area.y1),
                dash_attr(DASH_END_OF_RUN),
                N(if right { x - 4.0 } else { x + 4.0 }),
                N(area.y0 + 14.0),
                if right { "end" } else { "start" },
                Esc(&label)
            );
        } else {
            let (text, x, anchor) = if e > ts.t1 {
                (
                    format!("end of run beyond chart: {} →", ta.date(e)),
                    area.x1 - 6.0,
                    "end",
                )
            } else {
                (
                    format!("← end of run before chart: {}", ta.date(e)),
                    area.x0 + 6.0,
                    "start",
                )
            };
            w!(
                out,
                "<text class=\"beyond\" x=\"{}\" y=\"{}\" text-anchor=\"{anchor}\" font-size=\"11\" fill=\"{C_END_OF_RUN}\" \
                 stroke=\"#fff\" stroke-width=\"3\" paint-order=\"stroke\">{}</text>",
                N(x),
                N(area.y0 + 14.0),
                Esc(&text)
            );
        }
    }
    out.push_str("</g>");
}

/// Unit and axis of the key-component chart: ppm when the largest value is below 0.1 mol%,
/// else mol%; log10 when the positive values span more than two decades.
fn key_axis(values: &[f64]) -> Option<(f64, &'static str, Axis)> {
    let vals: Vec<f64> = values
        .iter()
        .copied()
        .filter(|v| usable_fraction(*v))
        .collect();
    let max_abs = vals.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    if vals.is_empty() {
        return None;
    }
    let (scale, unit) = if max_abs < 1e-3 {
        (1e6, "ppm")
    } else {
        (100.0, "mol %")
    };
    let pos = vals.iter().filter(|v| **v > 0.0);
    let (pmin, pmax) = pos.fold((f64::INFINITY, 0.0f64), |(a, b), v| (a.min(*v), b.max(*v)));
    if pmax > 0.0 && pmax / pmin > 100.0 {
        return Some((scale, unit, log_axis(pmin * scale, pmax * scale)));
    }
    let (lo, hi) = vals
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
            (a.min(*v), b.max(*v))
        });
    Some((scale, unit, linear_axis(lo * scale, hi * scale, 5)))
}

/// Every key-component value of the points (measured and at equilibrium).
fn key_values(pts: &[&PlotPoint]) -> Vec<f64> {
    pts.iter()
        .flat_map(|q| [q.key_measured, q.key_equilibrium])
        .flatten()
        .collect()
}

/// The key-component axis title: "CO, mol % dry basis", "CO, ppm, log scale".
fn key_label(key: &str, unit: &str, basis: Option<&str>, log: bool) -> String {
    let mut s = format!("{key}, {unit}");
    if let Some(b) = basis {
        s.push_str(&format!(" {b} basis"));
    }
    if log {
        s.push_str(", log scale");
    }
    s
}

fn key_chart(
    out: &mut String,
    p: &ReactorPlot,
    pts: &[&PlotPoint],
    key: &str,
    basis: Option<&str>,
    ta: &TimeAxis,
    area: Area,
) {
    let ts = ta.scale;
    let axis = key_axis(&key_values(pts));
    offline_group(out, "id=\"key-offline\"", &p.offline, &ts, area, "clip-key");
    draw_time_grid(out, area, ta, true);
    let mut drawn = 0usize;
    match axis {
        Some((scale, unit, axis)) => {
            let label = key_label(key, unit, basis, axis.log);
            let ys = YScale {
                axis,
                top: area.y0,
                bottom: area.y1,
            };
            draw_y_axis(out, area, &ys, &label);
            type Pick = fn(&PlotPoint) -> Option<f64>;
            let series: [(&str, Pick, &str, &str); 2] = [
                (
                    "key-equilibrium",
                    |q| q.key_equilibrium,
                    C_EQUILIBRIUM,
                    DASH_EQUILIBRIUM,
                ),
                ("key-measured", |q| q.key_measured, C_MEASURED, ""),
            ];
            for (id, pick, colour, dash) in series {
                let samples: Vec<Px> = pts
                    .iter()
                    .map(|q| Px {
                        x: ts.x(q.t_ms),
                        y: pick(q)
                            .filter(|v| usable_fraction(*v))
                            .and_then(|v| ys.y(v * scale)),
                        band: None,
                        env: None,
                        good: true,
                    })
                    .collect();
                let (series, decimated) = drawable(samples, area);
                w!(out, "<g id=\"{id}\" clip-path=\"url(#clip-key)\">");
                if decimated {
                    envelope(out, &series, colour, "0.15");
                }
                let (line, isolated) = line_path(&series);
                if !line.is_empty() {
                    w!(
                        out,
                        "<path class=\"line\" d=\"{line}\" fill=\"none\" stroke=\"{colour}\" stroke-width=\"1.6\" \
                         stroke-linejoin=\"round\"{}/>",
                        dash_attr(dash)
                    );
                }
                for (x, y) in isolated {
                    w!(
                        out,
                        "<circle class=\"point\" cx=\"{}\" cy=\"{}\" r=\"2.4\" fill=\"{colour}\"/>",
                        N(x),
                        N(y)
                    );
                }
                drawn += series.iter().filter(|q| q.y.is_some()).count();
                out.push_str("</g>");
            }
        }
        None => {
            out.push_str("<g id=\"key-equilibrium\"/><g id=\"key-measured\"/>");
        }
    }
    draw_frame(out, area);
    if drawn == 0 {
        draw_message(out, area, &format!("no data: no valid {key} value"));
    }
}

// ---------------------------------------------------------------------------------------------
// overview_svg
// ---------------------------------------------------------------------------------------------

/// Small multiples, times in UTC: see [`overview_svg_tz`].
pub fn overview_svg(plots: &[ReactorPlot], title: &str) -> String {
    overview_svg_tz(plots, title, TimeZone::UTC)
}

/// Small multiples, one row per reactor: approach with gaps, off-line periods, limit line
/// and markers, on a shared time axis labelled in `tz` (the span of all reactors' data).
pub fn overview_svg_tz(plots: &[ReactorPlot], title: &str, tz: TimeZone) -> String {
    let n = plots.len();
    let panel_h = if n == 0 {
        120.0
    } else {
        (540.0 / n as f64).clamp(90.0, 160.0)
    };
    let legend_y = 44.0;
    let mut items = vec![legend_item(
        Swatch::Line {
            colour: C_APPROACH,
            dash: "",
            width: 1.8,
        },
        "approach (K)",
    )];
    let sorted: Vec<Vec<&PlotPoint>> = plots.iter().map(|p| sorted_points(&p.points)).collect();
    if sorted
        .iter()
        .flatten()
        .any(|q| !q.approach_k.is_some_and(usable))
    {
        items.push(legend_item(Swatch::Band(C_GAP, 0.3), "bad quality (gap)"));
    }
    if plots.iter().any(|p| !p.offline.is_empty()) {
        items.push(legend_item(Swatch::Hatch, "unit off line"));
    }
    if plots.iter().any(|p| p.limit_k.is_some_and(usable)) {
        items.push(legend_item(
            Swatch::Line {
                colour: C_LIMIT,
                dash: DASH_LIMIT,
                width: 1.6,
            },
            "end-of-run limit",
        ));
    }
    for kind in MarkerKind::ALL {
        if plots
            .iter()
            .flat_map(|p| &p.markers)
            .any(|m| m.kind == kind)
        {
            items.push(legend_item(Swatch::Marker(kind), kind.class()));
        }
    }
    let (legend_pos, rows) = legend_layout(&items, LEFT, RIGHT, legend_y);
    let panels_top = legend_y + 16.0 * rows.max(1) as f64 + 4.0;
    let height = (panels_top + n.max(1) as f64 * panel_h + 56.0).ceil();

    let mut out = String::with_capacity(32 * 1024 + n * 24 * 1024);
    w!(
        out,
        "<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"{w}\" height=\"{h}\" viewBox=\"0 0 {w} {h}\" \
         font-family=\"sans-serif\" font-size=\"11\" role=\"img\" aria-labelledby=\"svg-title svg-desc\">",
        w = WIDTH,
        h = height
    );
    w!(out, "<title id=\"svg-title\">{}</title>", Esc(title));
    w!(
        out,
        "<desc id=\"svg-desc\">advisory: not a safety function. Approach to equilibrium of {} reactor{}, \
         one row each, on a shared time axis.</desc>",
        n,
        if n == 1 { "" } else { "s" }
    );
    let panel_area = |i: usize| Area {
        x0: LEFT,
        y0: panels_top + i as f64 * panel_h + 22.0,
        x1: RIGHT,
        y1: panels_top + (i + 1) as f64 * panel_h - 8.0,
    };
    out.push_str("<defs>");
    for i in 0..n {
        clip_rect(&mut out, &format!("clip-panel-{}", i + 1), panel_area(i));
    }
    w!(
        out,
        "<pattern id=\"hatch-offline\" width=\"6\" height=\"6\" patternUnits=\"userSpaceOnUse\" \
         patternTransform=\"rotate(45)\"><rect width=\"6\" height=\"6\" fill=\"{C_OFFLINE}\" fill-opacity=\"0.12\"/>\
         <line x1=\"0\" y1=\"0\" x2=\"0\" y2=\"6\" stroke=\"{C_OFFLINE}\" stroke-width=\"1.6\" stroke-opacity=\"0.45\"/></pattern>"
    );
    out.push_str("</defs>");
    w!(
        out,
        "<rect width=\"{}\" height=\"{}\" fill=\"#fff\"/>",
        WIDTH,
        height
    );
    w!(
        out,
        "<text class=\"title\" x=\"16\" y=\"24\" font-size=\"16\" font-weight=\"bold\" fill=\"{C_TEXT}\">{}</text>",
        Esc(title)
    );

    let (mut t0, mut t1) = (None::<i64>, None::<i64>);
    for q in sorted.iter().flatten() {
        t0 = Some(t0.map_or(q.t_ms, |v| v.min(q.t_ms)));
        t1 = Some(t1.map_or(q.t_ms, |v| v.max(q.t_ms)));
    }
    let ta = t0
        .zip(t1)
        .map(|(a, b)| time_axis(TimeScale::new(a, b, LEFT, RIGHT), tz));

    if n == 0 {
        let a = panel_area(0);
        draw_frame(&mut out, a);
        draw_message(&mut out, a, "no data: no reactors");
    }
    for (i, (p, pts)) in plots.iter().zip(&sorted).enumerate() {
        let area = panel_area(i);
        let last = i + 1 == n;
        overview_panel(&mut out, i + 1, p, pts, ta.as_ref(), area, last);
    }
    let caption = ta
        .as_ref()
        .map_or(format!("time ({})", tz.name()), |t| t.caption.clone());
    w!(
        out,
        "<text class=\"axis-label\" x=\"{}\" y=\"{}\" text-anchor=\"middle\" font-size=\"12\" fill=\"{C_TEXT}\">{}</text>",
        N(0.5 * (LEFT + RIGHT)),
        N(height - 26.0),
        Esc(&caption)
    );
    w!(
        out,
        "<text class=\"footer\" x=\"16\" y=\"{}\" font-size=\"10\" fill=\"{C_MUTED}\">advisory: not a safety function. eqwatch overview</text>",
        N(height - 8.0)
    );
    out.push_str("<g id=\"legend\">");
    draw_legend_items(&mut out, &items, &legend_pos);
    out.push_str("</g></svg>\n");
    out
}

/// One reactor's row of the overview, in `<g class="panel" id="panel-N">` with classes
/// (not ids, which must be unique) for its parts.
fn overview_panel(
    out: &mut String,
    index: usize,
    p: &ReactorPlot,
    pts: &[&PlotPoint],
    ta: Option<&TimeAxis>,
    area: Area,
    last: bool,
) {
    w!(
        out,
        "<g class=\"panel\" id=\"panel-{index}\" data-reactor=\"{}\">",
        Esc(&p.reactor)
    );
    let mut heading = if p.title.trim().is_empty() {
        p.reactor.clone()
    } else {
        p.title.clone()
    };
    if let Some(e) = p
        .projection
        .as_ref()
        .and_then(|pr| pr.end_of_run_ms)
        .filter(|&e| sane_t(e))
    {
        heading.push_str(&format!(" — end of run {}", fmt_date(e + tz_ms(ta))));
    }
    w!(
        out,
        "<text class=\"panel-title\" x=\"{}\" y=\"{}\" font-size=\"12\" font-weight=\"bold\" fill=\"{C_TEXT}\">{}</text>",
        N(area.x0),
        N(area.y0 - 7.0),
        Esc(&heading)
    );
    let Some(ta) = ta else {
        out.push_str(
            "<g class=\"gaps\"/><g class=\"limit\"/><g class=\"approach\"/><g class=\"markers\"/>",
        );
        draw_frame(out, area);
        draw_message(out, area, "no data");
        out.push_str("</g>");
        return;
    };
    let ts = ta.scale;
    let core = pts
        .iter()
        .filter_map(|q| q.approach_k)
        .chain(p.limit_k)
        .filter(|v| usable(*v));
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for v in core {
        lo = lo.min(v);
        hi = hi.max(v);
    }
    let has_axis = lo <= hi;
    if has_axis && lo >= 0.0 && lo <= 0.5 * hi {
        lo = 0.0;
    }
    let ys = YScale {
        axis: if has_axis {
            linear_axis(lo, hi, 3)
        } else {
            linear_axis(0.0, 1.0, 3)
        },
        top: area.y0,
        bottom: area.y1,
    };
    offline_group(
        out,
        "class=\"offline\"",
        &p.offline,
        &ts,
        area,
        &format!("clip-panel-{index}"),
    );
    draw_time_grid(out, area, ta, last);
    if has_axis {
        draw_y_axis(out, area, &ys, "approach (K)");
    }
    let samples: Vec<Px> = pts
        .iter()
        .map(|q| Px {
            x: ts.x(q.t_ms),
            y: q.approach_k
                .filter(|v| has_axis && usable(*v))
                .and_then(|v| ys.y(v)),
            band: None,
            env: None,
            good: q.good,
        })
        .collect();
    let gaps = gap_spans(&samples, area);
    let (series, decimated) = drawable(samples, area);
    let clip = format!("clip-path=\"url(#clip-panel-{index})\"");
    w!(
        out,
        "<g class=\"gaps\" {clip} fill=\"{C_GAP}\" fill-opacity=\"0.22\">"
    );
    for (a, b) in &gaps {
        w!(
            out,
            "<rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\"/>",
            N(*a),
            N(area.y0),
            N(b - a),
            N(area.h())
        );
    }
    out.push_str("</g><g class=\"limit\">");
    if let Some((l, y)) = p
        .limit_k
        .filter(|l| has_axis && usable(*l))
        .and_then(|l| ys.y(l).map(|y| (l, y)))
    {
        w!(
            out,
            "<path class=\"line\" d=\"M{},{} H{}\" stroke=\"{C_LIMIT}\" stroke-width=\"1.4\"{} fill=\"none\"/>\
             <text x=\"{}\" y=\"{}\" text-anchor=\"end\" font-size=\"10\" fill=\"{C_LIMIT}\" stroke=\"#fff\" \
             stroke-width=\"3\" paint-order=\"stroke\">limit {} K</text>",
            N(area.x0),
            N(y),
            N(area.x1),
            dash_attr(DASH_LIMIT),
            N(area.x1 - 4.0),
            N(y - 3.0),
            fmt_sig(l, 3)
        );
    }
    w!(out, "</g><g class=\"approach\" {clip}>");
    if decimated {
        envelope(out, &series, C_APPROACH, "0.18");
    }
    let (line, isolated) = line_path(&series);
    if !line.is_empty() {
        w!(
            out,
            "<path class=\"line\" d=\"{line}\" fill=\"none\" stroke=\"{C_APPROACH}\" stroke-width=\"1.5\" stroke-linejoin=\"round\"/>"
        );
    }
    for (x, y) in isolated {
        w!(
            out,
            "<circle class=\"point\" cx=\"{}\" cy=\"{}\" r=\"2.4\" fill=\"{C_APPROACH}\"/>",
            N(x),
            N(y)
        );
    }
    out.push_str("</g><g class=\"markers\">");
    draw_markers(out, &shown_markers(&p.markers, &ts), ta, area, 4.0, false);
    out.push_str("</g>");
    draw_frame(out, area);
    if !series.iter().any(|q| q.y.is_some()) {
        draw_message(
            out,
            area,
            "no approach value (where the equilibrium is below the analyser's detection limit, watch the key component)",
        );
    }
    out.push_str("</g>");
}

#[cfg(test)]
mod tests {
    use super::*;
    use roxmltree::{Document, Node};

    /// 2026-01-01T00:00:00Z in epoch ms (Python datetime); the start of invented test data.
    const T0: i64 = 1_767_225_600_000;
    const FIVE_MIN: i64 = 5 * MINUTE_MS;

    /// A plain good point (invented test data).
    fn pt(t_ms: i64, approach: Option<f64>) -> PlotPoint {
        PlotPoint {
            t_ms,
            approach_k: approach,
            uncertainty_k: Some(1.5),
            good: true,
            key_measured: Some(0.0030),
            key_equilibrium: Some(0.0025),
        }
    }

    /// A reactor with `n` points `step` apart, approach creeping up (invented test data).
    fn plot_n(n: usize, step: i64) -> ReactorPlot {
        let points = (0..n)
            .map(|i| {
                let f = i as f64 / n.max(1) as f64;
                pt(
                    T0 + i as i64 * step,
                    Some(8.0 + 6.0 * f + (i as f64 * 0.7).sin()),
                )
            })
            .collect();
        ReactorPlot {
            reactor: "lts1".into(),
            title: "Low-temperature shift converter (lts1)".into(),
            key_component: "CO".into(),
            limit_k: Some(25.0),
            points,
            ..ReactorPlot::default()
        }
    }

    fn parse(svg: &str) -> Document<'_> {
        match Document::parse(svg) {
            Ok(d) => d,
            Err(e) => panic!("not valid XML: {e}\n{}", &svg[..svg.len().min(2000)]),
        }
    }

    fn by_id<'a, 'i>(doc: &'a Document<'i>, id: &str) -> Node<'a, 'i> {
        let found: Vec<_> = doc
            .descendants()
            .filter(|n| n.attribute("id") == Some(id))
            .collect();
        assert_eq!(found.len(), 1, "exactly one element with id {id}");
        found[0]
    }

    fn has_class(n: &Node, class: &str) -> bool {
        n.attribute("class")
            .is_some_and(|c| c.split_whitespace().any(|w| w == class))
    }

    /// `d` of the first `path.CLASS` under `node`.
    fn path_d(node: Node, class: &str) -> Option<String> {
        node.descendants()
            .find(|n| n.has_tag_name("path") && has_class(n, class))
            .and_then(|n| n.attribute("d"))
            .map(str::to_string)
    }

    fn subpaths(d: &str) -> usize {
        d.matches('M').count()
    }

    fn texts(doc: &Document) -> Vec<String> {
        doc.descendants()
            .filter(|n| n.has_tag_name("text"))
            .map(|n| {
                n.descendants()
                    .filter(|t| t.is_text())
                    .filter_map(|t| t.text())
                    .collect::<String>()
            })
            .collect()
    }

    fn check_valid(svg: &str) {
        let doc = parse(svg);
        let root = doc.root_element();
        assert_eq!(root.tag_name().name(), "svg");
        assert!(root.attribute("viewBox").is_some());
        let desc = root
            .children()
            .find(|n| n.has_tag_name("desc"))
            .and_then(|n| n.text())
            .unwrap_or_default();
        assert!(desc.contains("advisory: not a safety function"));
    }

    const IDS: [&str; 21] = [
        "offline",
        "key-offline",
        "alarm-limits",
        "aggregates",
        "marker-numbers",
        "events",
        "approach",
        "uncertainty",
        "uncertain-quality",
        "baseline",
        "trend",
        "projection",
        "limit",
        "end-of-run",
        "markers",
        "key-measured",
        "key-equilibrium",
        "gaps",
        "legend",
        "svg-title",
        "svg-desc",
    ];

    #[test]
    fn root_has_viewbox_title_desc_and_every_group() {
        let p = plot_n(10, HOUR_MS);
        let svg = reactor_svg(&p);
        check_valid(&svg);
        let doc = parse(&svg);
        let root = doc.root_element();
        assert_eq!(root.attribute("viewBox"), Some("0 0 1000 640"));
        assert_eq!(root.attribute("font-family"), Some("sans-serif"));
        let title = root.children().find(|n| n.has_tag_name("title"));
        assert_eq!(title.and_then(|n| n.text()), Some(p.title.as_str()));
        for id in IDS {
            by_id(&doc, id);
        }
        let t = texts(&doc);
        for want in [
            "Approach to equilibrium",
            "approach to equilibrium (K)",
            "CO, mol %",
            "CO measured",
            "CO at equilibrium",
            "end-of-run limit 25 K",
        ] {
            assert!(t.iter().any(|s| s == want), "text {want:?} in {t:?}");
        }
        assert!(t.iter().any(|s| s.starts_with("time (UTC)")));
    }

    #[test]
    fn a_gap_breaks_the_line_and_is_shaded() {
        let mut p = plot_n(10, HOUR_MS);
        // A missing result: no approach and no key component (as replay writes a bad one).
        p.points[4].approach_k = None;
        p.points[4].key_measured = None;
        let svg = reactor_svg(&p);
        let doc = parse(&svg);
        let line = path_d(by_id(&doc, "approach"), "line").unwrap_or_default();
        assert_eq!(subpaths(&line), 2, "{line}");
        let gaps = by_id(&doc, "gaps");
        assert_eq!(
            gaps.children().filter(|n| n.has_tag_name("rect")).count(),
            1
        );
        // The uncertainty band is broken in the same place: two closed areas.
        let band = path_d(by_id(&doc, "uncertainty"), "band").unwrap_or_default();
        assert_eq!(subpaths(&band), 2);
        assert_eq!(band.matches('Z').count(), 2);
    }

    #[test]
    fn uncertain_points_are_hollow_and_lone_points_dotted() {
        let mut p = plot_n(200, HOUR_MS);
        p.points[10].good = false;
        p.points[11].good = false;
        // A lone valid point between two gaps: a line cannot show it, a dot does.
        p.points[50].approach_k = None;
        p.points[52].approach_k = None;
        let doc_s = reactor_svg(&p);
        let doc = parse(&doc_s);
        let uq = by_id(&doc, "uncertain-quality");
        assert_eq!(
            uq.children().filter(|n| n.has_tag_name("circle")).count(),
            2
        );
        let approach = by_id(&doc, "approach");
        let line = path_d(approach, "line").unwrap_or_default();
        assert_eq!(subpaths(&line), 3);
        let dots = approach
            .children()
            .filter(|n| n.has_tag_name("circle") && has_class(n, "point"))
            .count();
        assert_eq!(dots, 1);
    }

    #[test]
    fn markers_have_kind_classes_and_titles() {
        let mut p = plot_n(48, HOUR_MS);
        let kinds = MarkerKind::ALL;
        p.markers = kinds
            .iter()
            .enumerate()
            .map(|(i, &kind)| Marker {
                t_ms: T0 + (5 + 10 * i as i64) * HOUR_MS,
                kind,
                source: "alarm test".into(),
                label: format!("event {i} for {}", kind.class()),
            })
            .collect();
        // One before the data: not drawn, and said so.
        p.markers.push(Marker {
            t_ms: T0 - 30 * DAY_MS,
            kind: MarkerKind::Operator,
            source: "alarm test".into(),
            label: "old note".into(),
        });
        let svg = reactor_svg(&p);
        let doc = parse(&svg);
        let markers: Vec<Node> = by_id(&doc, "markers")
            .children()
            .filter(|n| has_class(n, "marker"))
            .collect();
        assert_eq!(markers.len(), 4);
        for (m, kind) in markers.iter().zip(kinds) {
            assert_eq!(
                m.attribute("class"),
                Some(format!("marker {}", kind.class()).as_str())
            );
            let title = m
                .children()
                .find(|n| n.has_tag_name("title"))
                .and_then(|n| n.text())
                .unwrap_or_default();
            assert!(title.contains(&format!("for {}", kind.class())), "{title}");
        }
        let t = texts(&doc);
        assert!(
            t.iter()
                .any(|s| s == "1 marker outside the time range not shown")
        );
        // Each kind has a legend entry.
        let legend = texts(&doc);
        for kind in kinds {
            assert!(legend.iter().any(|s| s == kind.class()));
        }
    }

    #[test]
    fn methanator_key_component_in_ppm_on_a_log_axis() {
        // Methanator-like outlet (invented test data): CO measured 5 ppm, 1e-4 ppm at equilibrium.
        let mut p = plot_n(30, HOUR_MS);
        p.title = "Methanator (meth1)".into();
        for q in &mut p.points {
            q.key_measured = Some(5e-6);
            q.key_equilibrium = Some(1e-10);
        }
        // Zero cannot be drawn on a log axis: a gap.
        p.points[12].key_measured = Some(0.0);
        let svg = reactor_svg(&p);
        let doc = parse(&svg);
        let t = texts(&doc);
        assert!(t.iter().any(|s| s == "CO, ppm, log scale"), "{t:?}");
        // Decade ticks from 1e-4 ppm to 10 ppm.
        for tick in ["1e-4", "0.001", "0.01", "0.1", "1", "10"] {
            assert!(t.iter().any(|s| s == tick), "tick {tick}");
        }
        let meas = path_d(by_id(&doc, "key-measured"), "line").unwrap_or_default();
        assert_eq!(subpaths(&meas), 2, "{meas}");
        let eq = path_d(by_id(&doc, "key-equilibrium"), "line").unwrap_or_default();
        assert_eq!(subpaths(&eq), 1);
    }

    #[test]
    fn key_unit_and_scale_choice() {
        // Values invented to sit either side of the 0.1 mol% and two-decade thresholds.
        let a = key_axis(&[0.003, 0.0025]);
        assert!(matches!(a, Some((s, "mol %", ref ax)) if s == 100.0 && !ax.log));
        let b = key_axis(&[500e-6, 300e-6]);
        assert!(matches!(b, Some((s, "ppm", ref ax)) if s == 1e6 && !ax.log));
        let c = key_axis(&[0.05, 0.0001]);
        assert!(matches!(c, Some((_, "mol %", ref ax)) if ax.log));
        assert!(key_axis(&[f64::NAN, f64::INFINITY]).is_none());
        // A mole fraction of -1 or 2 is not a reading: not plotted, does not set the axis.
        assert!(key_axis(&[-1.0, 2.0]).is_none());
        let d = key_axis(&[-1.0, 0.003, 0.0025]);
        assert!(matches!(d, Some((_, "mol %", ref ax)) if ax.lo >= 0.0));
        assert!(key_axis(&[]).is_none());
    }

    /// Every number in a path's `d` has at most one decimal place.
    fn one_decimal(d: &str) -> bool {
        d.split(|c: char| !(c.is_ascii_digit() || c == '.' || c == '-'))
            .filter(|s| !s.is_empty())
            .all(|s| s.split('.').nth(1).is_none_or(|f| f.len() <= 1))
    }

    /// A year of 5-minute data (105,120 points) with a 3-day bad-quality hole, some uncertain
    /// points, markers and a projection (invented test data).
    fn year_of_data() -> ReactorPlot {
        let n = 105_120usize;
        let mut p = plot_n(n, FIVE_MIN);
        for (i, q) in p.points.iter_mut().enumerate() {
            if i % 97 == 0 {
                q.good = false;
            }
            let f = i as f64 / n as f64;
            q.key_measured = Some(0.002 + 0.001 * f);
            q.key_equilibrium = Some(0.0015 + 0.0008 * f);
            // A 3-day hole without results: neither figure.
            if (50_000..50_864).contains(&i) {
                q.approach_k = None;
                q.key_measured = None;
            }
        }
        let end = T0 + n as i64 * FIVE_MIN;
        p.projection = Some(Projection {
            points: vec![
                (T0, 8.0, 7.0, 9.0),
                (end, 14.0, 13.0, 15.0),
                (end + 180 * DAY_MS, 25.0, 21.0, 29.0),
            ],
            slope_k_per_day: 0.0167,
            end_of_run_ms: Some(end + 180 * DAY_MS),
            end_of_run_range_ms: Some((end + 150 * DAY_MS, end + 230 * DAY_MS)),
        });
        p.baselines = vec![BaselineSpan {
            from_ms: T0,
            to_ms: T0 + 30 * DAY_MS,
            approach_k: 8.5,
            sigma_k: Some(0.6),
        }];
        p.markers = vec![
            Marker {
                t_ms: T0 + 200 * DAY_MS,
                kind: MarkerKind::Alert,
                source: "alarm test".into(),
                label: "approach drift".into(),
            },
            Marker {
                t_ms: T0 + 220 * DAY_MS,
                kind: MarkerKind::Cleared,
                source: "alarm test".into(),
                label: "back within baseline".into(),
            },
        ];
        p
    }

    #[test]
    fn a_year_of_five_minute_data_is_decimated_small_and_keeps_gaps() {
        let p = year_of_data();
        let svg = reactor_svg(&p);
        eprintln!("reactor_svg, 105,120 points: {} bytes", svg.len());
        assert!(svg.len() < 300_000, "{} bytes", svg.len());
        let doc = parse(&svg);
        let approach = by_id(&doc, "approach");
        let line = path_d(approach, "line").unwrap_or_default();
        assert!(subpaths(&line) >= 2, "the 3-day hole breaks the mean line");
        assert!(path_d(approach, "envelope").is_some());
        assert!(
            by_id(&doc, "gaps")
                .children()
                .any(|n| n.has_tag_name("rect"))
        );
        for n in doc.descendants().filter(|n| n.has_tag_name("path")) {
            let d = n.attribute("d").unwrap_or_default();
            assert!(one_decimal(d), "more than one decimal in {d}");
        }
        let ov = overview_svg(&[p.clone(), p], "Plant overview");
        eprintln!("overview_svg, 2 × 105,120 points: {} bytes", ov.len());
        assert!(ov.len() < 300_000);
        check_valid(&ov);
    }

    #[test]
    fn degenerate_inputs_give_valid_svg() {
        let mut cases: Vec<(&str, ReactorPlot)> = vec![("empty", ReactorPlot::default())];
        let mut all_nan = plot_n(20, HOUR_MS);
        for q in &mut all_nan.points {
            q.approach_k = Some(f64::NAN);
            q.uncertainty_k = Some(f64::NAN);
            q.key_measured = Some(f64::NAN);
            q.key_equilibrium = None;
        }
        all_nan.limit_k = Some(f64::NAN);
        cases.push(("all NaN", all_nan));
        cases.push(("single point", plot_n(1, HOUR_MS)));
        let mut equal = plot_n(20, HOUR_MS);
        for q in &mut equal.points {
            q.approach_k = Some(12.0);
            q.uncertainty_k = Some(0.0);
            q.key_measured = Some(0.0);
            q.key_equilibrium = Some(0.0);
        }
        equal.limit_k = None;
        cases.push(("equal values", equal));
        cases.push(("zero-length time range", plot_n(20, 0)));
        let mut inf = plot_n(20, HOUR_MS);
        inf.points[3].approach_k = Some(f64::INFINITY);
        inf.points[4].approach_k = Some(f64::NEG_INFINITY);
        inf.points[5].approach_k = Some(1e300);
        inf.points[6].uncertainty_k = Some(f64::INFINITY);
        inf.points[7].key_measured = Some(-1.0);
        cases.push(("inf and huge", inf));
        let mut unsorted = plot_n(20, HOUR_MS);
        unsorted.points.reverse();
        cases.push(("unsorted", unsorted));
        let mut extreme = plot_n(5, HOUR_MS);
        extreme.points[0].t_ms = i64::MIN;
        extreme.points[4].t_ms = i64::MAX;
        extreme.markers.push(Marker {
            t_ms: i64::MIN,
            kind: MarkerKind::Alarm,
            source: "alarm test".into(),
            label: String::new(),
        });
        extreme.baselines.push(BaselineSpan {
            from_ms: i64::MAX,
            to_ms: i64::MIN,
            approach_k: f64::NAN,
            sigma_k: Some(f64::INFINITY),
        });
        extreme.projection = Some(Projection {
            points: vec![
                (i64::MIN, 1.0, 2.0, 3.0),
                (T0, f64::NAN, 0.0, 1.0),
                (T0 + DAY_MS, 5.0, 6.0, 4.0),
            ],
            slope_k_per_day: f64::NAN,
            end_of_run_ms: Some(i64::MAX),
            end_of_run_range_ms: Some((i64::MAX, i64::MIN)),
        });
        cases.push(("extreme times", extreme));
        let mut only_markers = ReactorPlot::default();
        only_markers.markers.push(Marker {
            t_ms: T0,
            kind: MarkerKind::Operator,
            source: "alarm test".into(),
            label: "catalyst change".into(),
        });
        only_markers.projection = Some(Projection::default());
        cases.push(("markers without points", only_markers));
        let mut no_approach = plot_n(1, HOUR_MS);
        no_approach.points[0].approach_k = None;
        no_approach.points[0].key_measured = None;
        no_approach.points[0].key_equilibrium = None;
        cases.push(("one bad point", no_approach));

        for (name, p) in &cases {
            let svg = reactor_svg(p);
            check_valid(&svg);
            let doc = parse(&svg);
            for id in IDS {
                by_id(&doc, id);
            }
            if matches!(*name, "empty" | "all NaN" | "one bad point") {
                assert!(
                    texts(&doc).iter().any(|s| s.starts_with("no data")),
                    "{name}: says no data"
                );
            }
        }
        let all: Vec<ReactorPlot> = cases.into_iter().map(|(_, p)| p).collect();
        check_valid(&overview_svg(&all, "degenerate"));
    }

    #[test]
    fn text_is_escaped_for_xml() {
        let mut p = plot_n(5, HOUR_MS);
        p.title = "Shift <A> & \"B\" 'c'".into();
        p.key_component = "CO<2>".into();
        p.markers.push(Marker {
            t_ms: T0 + HOUR_MS,
            kind: MarkerKind::Operator,
            source: "alarm test".into(),
            label: "<script>alert(1)</script> & \u{1}bell".into(),
        });
        let svg = reactor_svg(&p);
        assert!(!svg.contains("<script>"));
        let doc = parse(&svg);
        let title = doc
            .root_element()
            .children()
            .find(|n| n.has_tag_name("title"))
            .and_then(|n| n.text());
        assert_eq!(title, Some("Shift <A> & \"B\" 'c'"));
        let marker_title = by_id(&doc, "markers")
            .descendants()
            .find(|n| n.has_tag_name("title"))
            .and_then(|n| n.text())
            .unwrap_or_default();
        assert!(marker_title.ends_with("<script>alert(1)</script> &  bell"));
        assert!(texts(&doc).iter().any(|s| s == "CO<2> measured"));
        let ov = overview_svg(&[p], "a < b & c");
        let doc = parse(&ov);
        let t = doc
            .root_element()
            .children()
            .find(|n| n.has_tag_name("title"));
        assert_eq!(t.and_then(|n| n.text()), Some("a < b & c"));
    }

    /// x positions of the tick labels under the top chart, as text.
    fn x_tick_labels(doc: &Document) -> Vec<String> {
        doc.descendants()
            .filter(|n| has_class(n, "x-axis"))
            .take(1)
            .flat_map(|g| g.children().filter(|n| n.has_tag_name("text")))
            .filter_map(|n| n.text().map(str::to_string))
            .collect()
    }

    #[test]
    fn time_axis_reaches_the_end_of_run() {
        // 30 days of hourly data, projected to reach the limit 15 days later (invented).
        let mut p = plot_n(30 * 24, HOUR_MS);
        let end = T0 + 30 * DAY_MS;
        let eor = end + 15 * DAY_MS;
        p.projection = Some(Projection {
            points: vec![
                (T0, 8.0, 7.5, 8.5),
                (end, 14.0, 13.0, 15.0),
                (eor, 25.0, 21.0, 29.0),
            ],
            slope_k_per_day: 0.4,
            end_of_run_ms: Some(eor),
            end_of_run_range_ms: Some((eor - 3 * DAY_MS, eor + 40 * DAY_MS)),
        });
        let svg = reactor_svg(&p);
        let doc = parse(&svg);
        let e = by_id(&doc, "end-of-run");
        let line = path_d(e, "line").unwrap_or_default();
        assert_eq!(subpaths(&line), 1);
        // 2026-01-01 + 45 days = 2026-02-15.
        assert!(texts(&doc).iter().any(|s| s == "end of run 2026-02-15"));
        assert!(
            e.descendants()
                .any(|n| has_class(&n, "range") && n.children().any(|c| c.has_tag_name("title")))
        );
        assert!(path_d(by_id(&doc, "trend"), "line").is_some());
        let proj = by_id(&doc, "projection");
        assert!(path_d(proj, "band").is_some() && path_d(proj, "line").is_some());
        assert!(texts(&doc).iter().any(|s| s == "trend +0.4 K/day"));
        let ticks = x_tick_labels(&doc);
        assert!(ticks.iter().any(|t| t.as_str() > "2026-02-01"), "{ticks:?}");
    }

    #[test]
    fn a_wild_forecast_is_capped_at_half_a_data_span() {
        // 10 days of data; a forecast 400 days out (invented).
        let mut p = plot_n(10 * 24, HOUR_MS);
        let end = T0 + 10 * DAY_MS;
        p.projection = Some(Projection {
            points: vec![(T0, 8.0, 7.5, 8.5), (end + 400 * DAY_MS, 25.0, 0.0, 80.0)],
            slope_k_per_day: 0.04,
            end_of_run_ms: Some(end + 400 * DAY_MS),
            end_of_run_range_ms: None,
        });
        let svg = reactor_svg(&p);
        let doc = parse(&svg);
        let t = texts(&doc);
        // 2026-01-11 + 400 days = 2027-02-15.
        assert!(
            t.iter()
                .any(|s| s == "end of run beyond chart: 2027-02-15 →"),
            "{t:?}"
        );
        // Axis ends at data end + 10 days / 2 = 2026-01-16.
        let ticks = x_tick_labels(&doc);
        assert!(!ticks.is_empty());
        assert!(
            ticks.iter().all(|t| t.as_str() <= "2026-01-16"),
            "{ticks:?}"
        );
    }

    fn num(n: &Node, attr: &str) -> f64 {
        n.attribute(attr)
            .and_then(|v| v.parse::<f64>().ok())
            .unwrap_or(f64::NAN)
    }

    /// (x, y, width, height) of the `rect`s directly in `g.number-box` groups.
    fn number_rects(doc: &Document) -> Vec<(f64, f64, f64, f64, String)> {
        by_id(doc, "marker-numbers")
            .children()
            .filter(|n| has_class(n, "number-box"))
            .map(|g| {
                let r = g.children().find(|n| n.has_tag_name("rect"));
                let t = g
                    .children()
                    .find(|n| n.has_tag_name("text"))
                    .and_then(|n| n.text())
                    .unwrap_or_default()
                    .to_string();
                match r {
                    Some(r) => (
                        num(&r, "x"),
                        num(&r, "y"),
                        num(&r, "width"),
                        num(&r, "height"),
                        t,
                    ),
                    None => (f64::NAN, f64::NAN, f64::NAN, f64::NAN, t),
                }
            })
            .collect()
    }

    fn assert_no_overlap(rects: &[(f64, f64, f64, f64, String)]) {
        for (i, a) in rects.iter().enumerate() {
            assert!(
                a.0 >= 0.0 && a.0 + a.2 <= WIDTH,
                "box {a:?} leaves the width"
            );
            // The text must fit its box (estimated generously, see text_width).
            assert!(text_width(&a.4, NUMBER_FONT) <= a.2, "{a:?}");
            for b in &rects[i + 1..] {
                let apart =
                    a.0 + a.2 <= b.0 || b.0 + b.2 <= a.0 || a.1 + a.3 <= b.1 || b.1 + b.3 <= a.1;
                assert!(apart, "boxes overlap: {a:?} and {b:?}");
            }
        }
    }

    /// Numbers named by the boxes ("4" or "3–5"), expanded, in box order.
    fn numbers_of(rects: &[(f64, f64, f64, f64, String)]) -> Vec<usize> {
        let mut v = Vec::new();
        for r in rects {
            let (a, b) = match r.4.split_once('–') {
                Some((a, b)) => (a.parse().unwrap_or(0), b.parse().unwrap_or(0)),
                None => {
                    let n: usize = r.4.parse().unwrap_or(0);
                    (n, n)
                }
            };
            v.extend(a..=b);
        }
        v.sort_unstable();
        v
    }

    #[test]
    fn close_events_get_numbers_that_never_overlap_and_a_list() {
        // 30 days of hourly data (invented); events: a burst of 12 within 3 hours, two 20
        // minutes apart at the very start and two at the very end, and a lone one.
        let mut p = plot_n(30 * 24, HOUR_MS);
        let end = T0 + (30 * 24 - 1) * HOUR_MS;
        let mut times: Vec<i64> = (0..12)
            .map(|i| T0 + 10 * DAY_MS + i * 15 * MINUTE_MS)
            .collect();
        times.extend([
            T0,
            T0 + 20 * MINUTE_MS,
            end - 20 * MINUTE_MS,
            end,
            T0 + 20 * DAY_MS,
        ]);
        p.markers = times
            .iter()
            .enumerate()
            .map(|(i, &t)| Marker {
                t_ms: t,
                kind: MarkerKind::ALL[i % 4],
                source: format!("alarm approach-high-{i}"),
                label: "raised".into(),
            })
            .collect();
        let svg = reactor_svg(&p);
        check_valid(&svg);
        let doc = parse(&svg);
        let rects = number_rects(&doc);
        assert!(!rects.is_empty());
        assert_no_overlap(&rects);
        // Every marker is numbered exactly once, 1..=17.
        assert_eq!(numbers_of(&rects), (1..=17).collect::<Vec<_>>());
        // The list under the chart has one row per event, numbered in time order.
        let rows: Vec<Node> = by_id(&doc, "events")
            .children()
            .filter(|n| has_class(n, "event-row"))
            .collect();
        assert_eq!(rows.len(), 17);
        let mut sorted = times.clone();
        sorted.sort_unstable();
        for (i, r) in rows.iter().enumerate() {
            assert_eq!(r.attribute("data-n"), Some((i + 1).to_string().as_str()));
            let cells: Vec<&str> = r
                .children()
                .filter(|n| n.has_tag_name("text"))
                .filter_map(|n| n.text())
                .collect();
            assert_eq!(cells[0], (i + 1).to_string());
            assert_eq!(cells[1], fmt_datetime(sorted[i]));
            assert!(cells[2].starts_with("alarm approach-high-"), "{cells:?}");
            assert_eq!(cells[3], "raised");
        }
        // The SVG grew to hold the numbers and the list; the footer is still the last line.
        let h = num(&doc.root_element(), "height");
        assert!(h > HEIGHT, "{h}");
        let list_bottom = rows
            .iter()
            .flat_map(|r| r.children().filter(|n| n.has_tag_name("text")))
            .map(|n| num(&n, "y"))
            .fold(0.0, f64::max);
        let footer = doc
            .descendants()
            .find(|n| has_class(n, "footer"))
            .map_or(f64::NAN, |n| num(&n, "y"));
        assert!(
            list_bottom + 10.0 <= footer && footer <= h,
            "{list_bottom} {footer} {h}"
        );
    }

    #[test]
    fn number_boxes_fit_for_many_layouts() {
        // Pseudo-random marker positions (a linear congruential generator, Knuth's MMIX
        // constants, from memory): 1 to 300 markers, clustered or spread, near the edges.
        let mut state = 0x2545_f491_4f6c_dd1du64;
        let mut next = || {
            state = state
                .wrapping_mul(6_364_136_223_846_793_005)
                .wrapping_add(1_442_695_040_888_963_407);
            (state >> 11) as f64 / (1u64 << 53) as f64
        };
        let (lo, hi) = (4.0, WIDTH - 4.0);
        for case in 0..200 {
            let n = 1 + (next() * 300.0) as usize;
            let spread = if case % 3 == 0 { 20.0 } else { 900.0 };
            let base = next() * (900.0 - spread) + 84.0;
            let mut xs: Vec<f64> = (0..n).map(|_| base + next() * spread).collect();
            if case % 5 == 0 {
                xs.push(84.0);
                xs.push(976.0);
            }
            xs.sort_by(f64::total_cmp);
            let (boxes, lanes) = number_boxes(&xs, lo, hi);
            assert!((1..=MAX_LANES).contains(&lanes), "{lanes}");
            let mut expect = 1;
            for (i, b) in boxes.iter().enumerate() {
                assert_eq!(b.first, expect, "case {case}");
                assert!(b.last >= b.first);
                expect = b.last + 1;
                assert!(b.x0 >= lo && b.x1 <= hi, "case {case}: {b:?}");
                assert!(text_width(&b.text(), NUMBER_FONT) < b.x1 - b.x0);
                for c in &boxes[i + 1..] {
                    assert!(
                        c.lane != b.lane || c.x0 >= b.x1 || c.x1 <= b.x0,
                        "case {case}: {b:?} and {c:?}"
                    );
                }
            }
            assert_eq!(expect, xs.len() + 1, "case {case}");
        }
    }

    #[test]
    fn operator_alarm_limit_is_drawn_with_its_value() {
        let mut p = plot_n(48, HOUR_MS);
        p.limit_k = Some(25.0);
        p.alarm_limits = vec![AlarmLimit {
            id: "approach-high".into(),
            limit_k: 15.0,
            high: true,
        }];
        let svg = reactor_svg(&p);
        let doc = parse(&svg);
        let g: Vec<Node> = by_id(&doc, "alarm-limits")
            .children()
            .filter(|n| has_class(n, "alarm-limit"))
            .collect();
        assert_eq!(g.len(), 1);
        assert_eq!(g[0].attribute("data-id"), Some("approach-high"));
        assert_eq!(g[0].attribute("data-limit-k"), Some("15"));
        let d = path_d(g[0], "line").unwrap_or_default();
        // The line sits at the y of the "15" tick of the approach axis (tick text is drawn
        // 3.5 px below its grid line).
        let tick_y = doc
            .descendants()
            .filter(|n| has_class(n, "y-axis"))
            .take(1)
            .flat_map(|a| a.children().filter(|n| n.has_tag_name("text")))
            .find(|n| n.text() == Some("15"))
            .map_or(f64::NAN, |n| num(&n, "y") - 3.5);
        let line_y: f64 = d
            .trim_start_matches('M')
            .split([',', ' '])
            .nth(1)
            .and_then(|v| v.parse().ok())
            .unwrap_or(f64::NAN);
        assert!((line_y - tick_y).abs() < 0.11, "{d} vs tick at {tick_y}");
        let t = texts(&doc);
        assert!(
            t.iter()
                .any(|s| s == "operator alarm approach-high (high) 15 K"),
            "{t:?}"
        );
        assert!(t.iter().any(|s| s == "end-of-run limit 25 K"));
        assert!(t.iter().any(|s| s == "operator alarm limit"));
        // The two labels at the right end do not overprint (12 px apart at least).
        let ys: Vec<f64> = ["alarm-limits", "limit"]
            .iter()
            .flat_map(|id| {
                by_id(&doc, id)
                    .descendants()
                    .filter(|n| n.has_tag_name("text"))
            })
            .map(|n| num(&n, "y"))
            .collect();
        assert_eq!(ys.len(), 2);
        assert!((ys[0] - ys[1]).abs() >= 12.0, "{ys:?}");
    }

    #[test]
    fn alarm_labels_close_together_are_stacked_apart() {
        let mut p = plot_n(48, HOUR_MS);
        p.limit_k = Some(20.0);
        p.alarm_limits = vec![
            AlarmLimit {
                id: "approach-high".into(),
                limit_k: 19.9,
                high: true,
            },
            AlarmLimit {
                id: "approach-high-high".into(),
                limit_k: 20.1,
                high: true,
            },
        ];
        let doc_s = reactor_svg(&p);
        let doc = parse(&doc_s);
        let mut ys: Vec<f64> = ["alarm-limits", "limit"]
            .iter()
            .flat_map(|id| {
                by_id(&doc, id)
                    .descendants()
                    .filter(|n| n.has_tag_name("text"))
            })
            .map(|n| num(&n, "y"))
            .collect();
        ys.sort_by(f64::total_cmp);
        assert_eq!(ys.len(), 3);
        assert!(ys.windows(2).all(|w| w[1] - w[0] >= 12.0), "{ys:?}");
    }

    #[test]
    fn offline_periods_are_shaded_over_their_span() {
        // Ten hourly points (invented), off line from hour 2 to hour 4.
        let mut p = plot_n(10, HOUR_MS);
        p.offline = vec![OfflineSpan {
            from_ms: T0 + 2 * HOUR_MS,
            to_ms: T0 + 4 * HOUR_MS,
        }];
        let svg = reactor_svg(&p);
        let doc = parse(&svg);
        let per_hour = (RIGHT - LEFT) / 9.0;
        for id in ["offline", "key-offline"] {
            let rects: Vec<Node> = by_id(&doc, id)
                .children()
                .filter(|n| has_class(n, "offline"))
                .collect();
            assert_eq!(rects.len(), 1, "{id}");
            let (x, w) = (num(&rects[0], "x"), num(&rects[0], "width"));
            assert!((x - (LEFT + 2.0 * per_hour)).abs() < 0.11, "{id}: x {x}");
            assert!((w - 2.0 * per_hour).abs() < 0.11, "{id}: width {w}");
        }
        assert!(texts(&doc).iter().any(|s| s == "unit off line"));
        // A period running past the data is cut at the chart's end.
        p.offline[0].to_ms = T0 + 40 * HOUR_MS;
        let svg = reactor_svg(&p);
        let doc = parse(&svg);
        let r = by_id(&doc, "offline")
            .children()
            .find(|n| has_class(n, "offline"));
        let right = r.map_or(f64::NAN, |r| num(&r, "x") + num(&r, "width"));
        assert!((right - RIGHT).abs() < 0.11, "{right}");
    }

    #[test]
    fn aggregate_points_match_the_aggregates() {
        let mut p = plot_n(20 * 24, HOUR_MS);
        // Daily means (invented): 19 inside the data, one before it (not drawn).
        p.aggregates = (0..19)
            .map(|d| AggregatePoint {
                t_ms: T0 + d * DAY_MS + 12 * HOUR_MS,
                approach_k: 9.0 + 0.2 * d as f64,
                in_fit: d >= 4,
            })
            .collect();
        p.aggregates.push(AggregatePoint {
            t_ms: T0 - 3 * DAY_MS,
            approach_k: 9.0,
            in_fit: false,
        });
        p.aggregate_period_ms = DAY_MS;
        let svg = reactor_svg(&p);
        let doc = parse(&svg);
        let g = by_id(&doc, "aggregates");
        let pts: Vec<Node> = g.children().filter(|n| has_class(n, "aggregate")).collect();
        assert_eq!(pts.len(), 19);
        assert_eq!(pts.iter().filter(|n| has_class(n, "in-fit")).count(), 15);
        let t = texts(&doc);
        assert!(t.iter().any(|s| s == "daily mean (trend fit)"), "{t:?}");
        assert!(t.iter().any(|s| s == "daily mean (not in fit)"));
    }

    #[test]
    fn key_chart_names_its_basis() {
        let mut p = plot_n(10, HOUR_MS);
        p.key_basis = Some("dry".into());
        let doc_s = reactor_svg(&p);
        let doc = parse(&doc_s);
        let t = texts(&doc);
        assert!(t.iter().any(|s| s == "CO, mol % dry basis"), "{t:?}");
        assert!(
            t.iter()
                .any(|s| s == "CO (dry basis): measured and at equilibrium")
        );
    }

    #[test]
    fn time_zone_parsing() {
        for (text, minutes) in [
            ("UTC", 0),
            ("z", 0),
            ("+01:00", 60),
            ("-05:30", -330),
            ("+0545", 345),
            ("UTC+02", 120),
            ("utc-03:00", -180),
            ("+23:59", 1439),
        ] {
            assert_eq!(
                TimeZone::parse(text).map(|z| z.offset_minutes()),
                Ok(minutes),
                "{text}"
            );
        }
        for bad in [
            "",
            "CET",
            "+1",
            "+24:00",
            "+01:60",
            "01:00",
            "+01:00:00",
            "Europe/Berlin",
        ] {
            assert!(TimeZone::parse(bad).is_err(), "{bad}");
        }
        assert_eq!(
            TimeZone::parse("+01:00").map(|z| z.name()),
            Ok("UTC+01:00".to_string())
        );
        assert_eq!(
            TimeZone::parse("-05:30").map(|z| z.name()),
            Ok("UTC-05:30".to_string())
        );
        assert_eq!(TimeZone::UTC.name(), "UTC");
    }

    /// (label, x) of the tick labels under the top chart.
    fn x_ticks_at(doc: &Document) -> Vec<(String, f64)> {
        doc.descendants()
            .filter(|n| has_class(n, "x-axis"))
            .take(1)
            .flat_map(|g| g.children().filter(|n| n.has_tag_name("text")))
            .map(|n| (n.text().unwrap_or_default().to_string(), num(&n, "x")))
            .collect()
    }

    #[test]
    fn a_time_zone_shifts_the_labels() {
        // 48 hourly points from 2026-01-01T00:00Z (invented): six-hour ticks.
        let mut p = plot_n(48, HOUR_MS);
        p.markers = vec![Marker {
            t_ms: T0 + 5 * HOUR_MS,
            kind: MarkerKind::Alarm,
            source: "alarm approach-high".into(),
            label: "raised".into(),
        }];
        let utc = reactor_svg(&p);
        let plus1 = reactor_svg_tz(&p, TimeZone::parse("+01:00").unwrap_or_default());
        let (du, dp) = (parse(&utc), parse(&plus1));
        let per_hour = (RIGHT - LEFT) / 47.0;
        let at = |ticks: &[(String, f64)], label: &str| {
            ticks
                .iter()
                .find(|t| t.0 == label)
                .map_or(f64::NAN, |t| t.1)
        };
        let (tu, tp) = (x_ticks_at(&du), x_ticks_at(&dp));
        // "01-01 06:00" is 06:00 UTC on one chart and 05:00 UTC on the other.
        assert!(
            (at(&tu, "01-01 06:00") - (LEFT + 6.0 * per_hour)).abs() < 0.11,
            "{tu:?}"
        );
        assert!(
            (at(&tp, "01-01 06:00") - (LEFT + 5.0 * per_hour)).abs() < 0.11,
            "{tp:?}"
        );
        assert!(texts(&dp).iter().any(|s| s == "time (UTC+01:00), 2026"));
        assert!(texts(&du).iter().any(|s| s == "time (UTC), 2026"));
        // The event list and the marker's tooltip give local time: 05:00Z is 06:00 at +01:00.
        let t = texts(&dp);
        assert!(t.iter().any(|s| s == "2026-01-01 06:00"), "{t:?}");
        assert!(t.iter().any(|s| s.ends_with("times UTC+01:00)")));
        let title = by_id(&dp, "markers")
            .descendants()
            .find(|n| n.has_tag_name("title"))
            .and_then(|n| n.text())
            .unwrap_or_default()
            .to_string();
        assert!(title.contains("2026-01-01 06:00 UTC+01:00"), "{title}");
        // Overview too.
        let o = overview_svg_tz(&[p], "x", TimeZone::parse("-05:00").unwrap_or_default());
        assert!(
            texts(&parse(&o))
                .iter()
                .any(|s| s == "time (UTC-05:00), 2025–2026")
        );
    }

    #[test]
    fn axis_titles_clear_the_tick_labels() {
        // Tiny approach values (invented) give long tick labels such as "0.0001".
        let mut p = plot_n(40, HOUR_MS);
        p.limit_k = None;
        for (i, q) in p.points.iter_mut().enumerate() {
            q.approach_k = Some(0.0001 + 0.00001 * (i % 7) as f64);
            q.uncertainty_k = None;
            q.key_measured = Some(123_456.0e-6 + 1e-6 * i as f64);
        }
        for svg in [reactor_svg(&p), overview_svg(&[p.clone()], "x")] {
            let doc = parse(&svg);
            let mut long = 0;
            for axis in doc.descendants().filter(|n| has_class(n, "y-axis")) {
                let labels: Vec<Node> =
                    axis.children().filter(|n| n.has_tag_name("text")).collect();
                let Some((title, ticks)) = labels.split_last() else {
                    continue;
                };
                assert!(has_class(title, "axis-label"));
                let leftmost = ticks
                    .iter()
                    .map(|n| num(n, "x") - text_width(n.text().unwrap_or_default(), 11.0))
                    .fold(f64::INFINITY, f64::min);
                // The rotated 12 px title reaches about 3 px right of its x.
                let title_right = num(title, "x") + 3.0;
                assert!(title_right + 4.0 <= leftmost, "{title_right} vs {leftmost}");
                assert!(num(title, "x") - 9.0 >= 0.0);
                long += ticks
                    .iter()
                    .filter(|n| n.text().is_some_and(|s| s.len() >= 6))
                    .count();
            }
            assert!(long > 0, "the case has long tick labels");
        }
        // Bottom: the time caption is below the tick labels of the key chart, and the key
        // chart's title below the top chart's tick labels.
        let svg = reactor_svg(&p);
        let doc = parse(&svg);
        // Time labels never touch each other, at any span (invented spans, 1 h to 3 years).
        for span in [
            HOUR_MS,
            7 * HOUR_MS,
            9 * HOUR_MS + 50 * MINUTE_MS,
            3 * DAY_MS,
            400 * DAY_MS,
            1100 * DAY_MS,
        ] {
            let q = plot_n(60, span / 59);
            let d_s = reactor_svg(&q);
            let d = parse(&d_s);
            let mut boxes: Vec<(f64, f64)> = d
                .descendants()
                .filter(|n| has_class(n, "x-axis"))
                .take(1)
                .flat_map(|g| g.children().filter(|n| n.has_tag_name("text")))
                .map(|n| {
                    let (x, tw) = (num(&n, "x"), text_width(n.text().unwrap_or_default(), 11.0));
                    if n.attribute("text-anchor") == Some("end") {
                        (x - tw, x)
                    } else {
                        (x - 0.5 * tw, x + 0.5 * tw)
                    }
                })
                .collect();
            boxes.sort_by(|a, b| a.0.total_cmp(&b.0));
            assert!(boxes.len() >= 2, "span {span}");
            for w in boxes.windows(2) {
                assert!(w[0].1 <= w[1].0, "span {span}: {boxes:?}");
            }
        }
        let tick_ys: Vec<f64> = doc
            .descendants()
            .filter(|n| has_class(n, "x-axis"))
            .map(|g| {
                g.children()
                    .filter(|n| n.has_tag_name("text"))
                    .map(|n| num(&n, "y"))
                    .fold(0.0, f64::max)
            })
            .collect();
        assert_eq!(tick_ys.len(), 2);
        let caption = doc
            .descendants()
            .filter(|n| has_class(n, "axis-label") && n.attribute("transform").is_none())
            .map(|n| num(&n, "y"))
            .fold(0.0, f64::max);
        // 12 px caption: its top is about 9 px above the baseline; 11 px labels go 3 px below.
        assert!(
            caption - 9.0 >= tick_ys[1] + 3.0 + 2.0,
            "{caption} {tick_ys:?}"
        );
        let titles: Vec<f64> = doc
            .descendants()
            .filter(|n| has_class(n, "chart-title"))
            .map(|n| num(&n, "y"))
            .collect();
        assert!(
            titles[1] - 10.0 >= tick_ys[0] + 3.0 + 2.0,
            "{titles:?} {tick_ys:?}"
        );
    }

    #[test]
    fn axis_helpers() {
        // Expected values worked by hand from the 1-2-5 rule.
        assert_eq!(nice_step(0.3), 0.5);
        assert_eq!(nice_step(1.0), 1.0);
        assert_eq!(nice_step(1.5), 2.0);
        assert_eq!(nice_step(7.0), 10.0);
        // Tiny values (a methanator's CO as a fraction, invented) get exponent labels that
        // read back as their tick values.
        let tiny = linear_axis(1.0e-7, 1.4e-7, 5);
        assert!(tiny.ticks.len() >= 4);
        for (v, t) in &tiny.ticks {
            assert!(t.contains("e-"), "{t}");
            let back: f64 = t.parse().unwrap_or(f64::NAN);
            assert!((back - v).abs() < 1e-10, "{t} for {v}");
        }
        let a = linear_axis(0.0, 37.0, 6);
        let labels: Vec<&str> = a.ticks.iter().map(|(_, s)| s.as_str()).collect();
        assert_eq!(labels, ["0", "10", "20", "30", "40"]);
        let b = linear_axis(0.12, 0.19, 5);
        assert!(b.ticks.iter().all(|(_, s)| s.len() <= 4), "{:?}", b.ticks);
        let c = linear_axis(5.0, 5.0, 5);
        assert!(c.hi > c.lo && c.lo <= 5.0 && c.hi >= 5.0);
        assert_eq!(fmt_pow10(-4), "1e-4");
        assert_eq!(fmt_pow10(-2), "0.01");
        assert_eq!(fmt_pow10(3), "1000");
        assert_eq!(N(1.26).to_string(), "1.3");
        assert_eq!(N(-0.04).to_string(), "0");
        assert_eq!(N(3.0).to_string(), "3");
        assert_eq!(N(-2.55).to_string(), "-2.6");
        assert_eq!(N(f64::NAN).to_string(), "0");
    }

    #[test]
    fn utc_dates_and_time_ticks() {
        // 1772366400 s = 2026-03-01 12:00 UTC (POSIX `date -u -d '2026-03-01 12:00' +%s`).
        let t = 1_772_366_400_000;
        assert_eq!(fmt_date(t), "2026-03-01");
        assert_eq!(fmt_datetime(t), "2026-03-01 12:00");
        assert_eq!(fmt_datetime(0), "1970-01-01 00:00");
        assert_eq!(fmt_date(-1), "1969-12-31");
        // Month ticks start on the first of the next month.
        let ticks = time_ticks(T0 + 14 * DAY_MS, T0 + 170 * DAY_MS, TimeStep::Months(1));
        let labels: Vec<String> = ticks
            .iter()
            .map(|&t| time_label(t, TimeStep::Months(1)))
            .collect();
        assert_eq!(
            labels,
            ["2026-02", "2026-03", "2026-04", "2026-05", "2026-06"]
        );
        // Weekly ticks fall on Mondays; 2026-01-05 was a Monday (Python datetime).
        let weeks = time_ticks(T0, T0 + 40 * DAY_MS, TimeStep::Ms(7 * DAY_MS));
        assert_eq!(fmt_date(weeks[0]), "2026-01-05");
        // The step grows with the span.
        assert_eq!(choose_time_step(HOUR_MS, 9), TimeStep::Ms(10 * MINUTE_MS));
        assert_eq!(choose_time_step(3 * DAY_MS, 9), TimeStep::Ms(12 * HOUR_MS));
        assert_eq!(choose_time_step(365 * DAY_MS, 9), TimeStep::Months(2));
        assert_eq!(
            time_label(t, TimeStep::Ms(HOUR_MS)),
            "03-01 12:00".to_string()
        );
    }

    #[test]
    fn overview_has_one_panel_per_reactor() {
        let a = plot_n(100, HOUR_MS);
        let mut b = plot_n(50, 2 * HOUR_MS);
        b.reactor = "meth1".into();
        b.title = "Methanator (meth1)".into();
        b.points[20].approach_k = None;
        b.markers.push(Marker {
            t_ms: T0 + 10 * HOUR_MS,
            kind: MarkerKind::Alarm,
            source: "alarm test".into(),
            label: "approach above limit".into(),
        });
        let c = ReactorPlot {
            reactor: "hts1".into(),
            ..ReactorPlot::default()
        };
        let svg = overview_svg(&[a, b, c], "Plant overview");
        check_valid(&svg);
        let doc = parse(&svg);
        let panels: Vec<Node> = doc
            .descendants()
            .filter(|n| has_class(n, "panel"))
            .collect();
        assert_eq!(panels.len(), 3);
        assert_eq!(panels[1].attribute("data-reactor"), Some("meth1"));
        let approach = |p: &Node| {
            p.children()
                .find(|n| has_class(n, "approach"))
                .and_then(|g| path_d(g, "line"))
        };
        assert_eq!(approach(&panels[0]).map(|d| subpaths(&d)), Some(1));
        assert_eq!(approach(&panels[1]).map(|d| subpaths(&d)), Some(2));
        assert_eq!(approach(&panels[2]), None);
        let marks = panels[1]
            .descendants()
            .filter(|n| has_class(n, "marker") && has_class(n, "alarm"))
            .count();
        assert_eq!(marks, 1);
        assert!(
            panels[0]
                .descendants()
                .any(|n| has_class(&n, "limit") && n.has_children())
        );
        let empty = overview_svg(&[], "nothing");
        check_valid(&empty);
        assert!(
            texts(&parse(&empty))
                .iter()
                .any(|s| s.starts_with("no data"))
        );
    }

    #[test]
    fn pure_and_deterministic() {
        // The module (tests excluded) names no file, network, clock or runtime API.
        let src = include_str!("mod.rs");
        let code = src.split("#[cfg(test)]").next().unwrap_or_default();
        for needle in [
            ["std", "::fs"].concat(),
            ["std", "::net"].concat(),
            ["std", "::io"].concat(),
            ["std", "::env"].concat(),
            ["File", "::"].concat(),
            ["System", "Time"].concat(),
            ["Instant", "::now"].concat(),
            ["tok", "io"].concat(),
            ["print", "ln!"].concat(),
        ] {
            assert!(!code.contains(&needle), "plot.rs uses {needle}");
        }
        let p = year_of_data();
        assert_eq!(reactor_svg(&p), reactor_svg(&p));
        let all = [p.clone(), plot_n(3, HOUR_MS)];
        assert_eq!(overview_svg(&all, "x"), overview_svg(&all, "x"));
    }

    /// Writes samples for a person to look at: `cargo test --lib plot -- --ignored`.
    #[test]
    #[ignore]
    fn write_samples() {
        let mut p = plot_n(30 * 24, HOUR_MS);
        for i in 300..330 {
            p.points[i].approach_k = None;
        }
        for i in (400..460).step_by(3) {
            p.points[i].good = false;
        }
        let end = T0 + 30 * DAY_MS;
        let eor = end + 20 * DAY_MS;
        p.projection = Some(Projection {
            points: vec![
                (T0, 8.0, 7.6, 8.4),
                (end, 14.0, 13.4, 14.6),
                (eor, 25.0, 21.0, 29.0),
            ],
            slope_k_per_day: 0.55,
            end_of_run_ms: Some(eor),
            end_of_run_range_ms: Some((eor - 4 * DAY_MS, eor + 9 * DAY_MS)),
        });
        p.baselines.push(BaselineSpan {
            from_ms: T0,
            to_ms: T0 + 7 * DAY_MS,
            approach_k: 8.3,
            sigma_k: Some(0.7),
        });
        p.markers = vec![
            Marker {
                t_ms: T0 + 18 * DAY_MS,
                kind: MarkerKind::Alert,
                source: "alarm test".into(),
                label: "approach rising faster than baseline".into(),
            },
            Marker {
                t_ms: T0 + 24 * DAY_MS,
                kind: MarkerKind::Alarm,
                source: "alarm test".into(),
                label: "approach 3 sigma above baseline".into(),
            },
            Marker {
                t_ms: T0 + 26 * DAY_MS,
                kind: MarkerKind::Cleared,
                source: "alarm test".into(),
                label: "alarm cleared".into(),
            },
            Marker {
                t_ms: T0 + 12 * DAY_MS,
                kind: MarkerKind::Operator,
                source: "alarm test".into(),
                label: "analyser recalibrated".into(),
            },
        ];
        // Close events, alarm limits, an off-line period and daily means (invented).
        for i in 0..6 {
            p.markers.push(Marker {
                t_ms: T0 + 24 * DAY_MS + (i + 1) * 40 * MINUTE_MS,
                kind: MarkerKind::ALL[i as usize % 4],
                source: "alarm approach-high".into(),
                label: "acknowledged by op1".into(),
            });
        }
        p.alarm_limits = vec![AlarmLimit {
            id: "approach-high".into(),
            limit_k: 18.0,
            high: true,
        }];
        p.offline = vec![OfflineSpan {
            from_ms: T0 + 12 * DAY_MS + 12 * HOUR_MS,
            to_ms: T0 + 13 * DAY_MS + 18 * HOUR_MS,
        }];
        p.aggregates = (0..29)
            .map(|d| AggregatePoint {
                t_ms: T0 + d * DAY_MS + 12 * HOUR_MS,
                approach_k: 8.0 + 0.2 * d as f64,
                in_fit: d >= 7,
            })
            .collect();
        p.aggregate_period_ms = DAY_MS;
        p.key_basis = Some("dry".into());
        let mut m = plot_n(30 * 24, HOUR_MS);
        m.title = "Methanator (meth1)".into();
        m.reactor = "meth1".into();
        for (i, q) in m.points.iter_mut().enumerate() {
            q.key_measured = Some(4e-6 + 2e-6 * (i as f64 * 0.05).sin());
            q.key_equilibrium = Some(1e-10 * (1.0 + 0.3 * (i as f64 * 0.02).cos()));
        }
        let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("target");
        let write = |name: &str, s: &str| {
            if let Err(e) = std::fs::write(dir.join(name), s) {
                panic!("writing {name}: {e}");
            }
        };
        write("plot-sample.svg", &reactor_svg(&p));
        write("plot-sample-methanator.svg", &reactor_svg(&m));
        write("plot-sample-year.svg", &reactor_svg(&year_of_data()));
        write(
            "plot-sample-overview.svg",
            &overview_svg(&[p, m, year_of_data()], "Plant overview"),
        );
    }
}
