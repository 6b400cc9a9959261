//! Axes: UTC dates from epoch milliseconds, linear and log value axes with their ticks, the
//! value scale, the time scale with its step, ticks and labels, and drawing the y axis and
//! the time grid.

use std::fmt::Write as _;

use super::model::TimeZone;
use super::style::{C_FRAME, C_GRID, C_TEXT, LEFT, WIDTH};
use super::svg::{Area, Esc, N, fmt_fixed, text_width, usable};
use crate::timefmt::{civil_from_days, days_from_civil};
use crate::units::{DAY_MS, HOUR_MS, MINUTE_MS};

const MONTH_MS_APPROX: i64 = 2_629_746_000; // 365.2425 / 12 days

const YEAR_MS_APPROX: i64 = 31_556_952_000; // 365.2425 days

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
pub(super) fn tz_ms(ta: Option<&TimeAxis>) -> i64 {
    ta.map_or(0, |t| t.tz.offset_ms())
}

/// "2026-03-01".
pub(super) fn fmt_date(ms: i64) -> String {
    let c = civil(ms);
    format!("{:04}-{:02}-{:02}", c.y, c.mo, c.d)
}

/// "2026-03-01 12:00".
pub(super) fn fmt_datetime(ms: i64) -> String {
    let c = civil(ms);
    format!("{:04}-{:02}-{:02} {:02}:{:02}", c.y, c.mo, c.d, c.h, c.mi)
}

/// A y axis: range in axis units (log10 of the value on a log axis) and labelled ticks.
#[derive(Clone, Debug)]
pub(super) struct Axis {
    pub(super) lo: f64,
    pub(super) hi: f64,
    pub(super) log: bool,
    pub(super) ticks: Vec<(f64, String)>,
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
pub(super) fn linear_axis(min: f64, max: f64, target: usize) -> Axis {
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
pub(super) fn log_axis(min: f64, max: f64) -> Axis {
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
pub(super) struct YScale {
    pub(super) axis: Axis,
    pub(super) top: f64,
    pub(super) bottom: f64,
}

impl YScale {
    /// Pixel row of `v`, or `None` when it cannot be drawn (NaN, or ≤ 0 on a log axis).
    pub(super) fn y(&self, v: f64) -> Option<f64> {
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
pub(super) enum TimeStep {
    Ms(i64),
    Months(i64),
    Years(i64),
}

/// The time range of a chart and its mapping to pixel columns.
#[derive(Clone, Copy, Debug)]
pub(super) struct TimeScale {
    pub(super) t0: i64,
    pub(super) t1: i64,
    pub(super) x0: f64,
    pub(super) x1: f64,
}

impl TimeScale {
    /// `t0 < t1` is guaranteed by [`TimeScale::new`].
    pub(super) fn new(t0: i64, t1: i64, x0: f64, x1: f64) -> TimeScale {
        let (mut t0, mut t1) = (t0.min(t1), t0.max(t1));
        if t1 - t0 < MINUTE_MS {
            let mid = t0 + (t1 - t0) / 2;
            (t0, t1) = (mid - 30 * MINUTE_MS, mid + 30 * MINUTE_MS);
        }
        TimeScale { t0, t1, x0, x1 }
    }
    pub(super) fn x(&self, t: i64) -> f64 {
        let frac = (t as f64 - self.t0 as f64) / (self.t1 as f64 - self.t0 as f64);
        self.x0 + frac * (self.x1 - self.x0)
    }
    pub(super) fn contains(&self, t: i64) -> bool {
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
pub(super) struct TimeAxis {
    pub(super) scale: TimeScale,
    pub(super) step: TimeStep,
    pub(super) ticks: Vec<(i64, String)>,
    pub(super) caption: String,
    pub(super) tz: TimeZone,
}

pub(super) fn time_axis(scale: TimeScale, tz: TimeZone) -> TimeAxis {
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
    pub(super) fn when(&self, t: i64) -> String {
        match self.step {
            TimeStep::Ms(s) if s < DAY_MS => self.datetime(t),
            _ => self.date(t),
        }
    }
    /// "2026-03-01" in the axis's zone.
    pub(super) fn date(&self, t: i64) -> String {
        fmt_date(t + self.tz.offset_ms())
    }
    /// "2026-03-01 12:00" in the axis's zone.
    pub(super) fn datetime(&self, t: i64) -> String {
        fmt_datetime(t + self.tz.offset_ms())
    }
}

/// Horizontal grid lines, tick labels and the rotated y label.
pub(super) fn draw_y_axis(out: &mut String, area: Area, ys: &YScale, label: &str) {
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
pub(super) fn draw_time_grid(out: &mut String, area: Area, ta: &TimeAxis, labels: bool) {
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

/// Widest tick label of an axis (px at 11 px).
pub(super) fn tick_label_w(axis: &Axis) -> f64 {
    axis.ticks
        .iter()
        .map(|(_, t)| text_width(t, 11.0))
        .fold(0.0, f64::max)
}

/// Left edge of the plot areas: room for the widest tick label, a gap, and the rotated
/// axis title (never less than [`LEFT`]).
pub(super) fn left_for(label_w: f64) -> f64 {
    LEFT.max((5.0 + label_w + 8.0 + 12.0 + 6.0).ceil())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::plot::model::{Marker, MarkerKind, TimeZone};
    use crate::plot::overview::{overview_svg, overview_svg_tz};
    use crate::plot::reactor::{reactor_svg, reactor_svg_tz};
    use crate::plot::style::{LEFT, RIGHT};
    use crate::plot::svg::{N, text_width};
    use crate::plot::test_support::{T0, by_id, has_class, num, parse, plot_n, texts, x_ticks_at};
    use crate::units::{DAY_MS, HOUR_MS, MINUTE_MS};
    use roxmltree::Node;

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
}
