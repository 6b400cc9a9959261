//! Series geometry: raw samples in pixels, decimation per pixel column (min–max envelope
//! plus the mean line), line, band and bar paths, gaps where no valid point is, and hatched
//! off-line spans (shared by the approach, key and overview charts).

use std::fmt::Write as _;

use super::axes::TimeScale;
use super::model::OfflineSpan;
use super::svg::{Area, N, sane_t};

/// One sample in pixel space. `y: None` breaks the line.
#[derive(Clone, Copy, Debug)]
pub(super) struct Px {
    pub(super) x: f64,
    pub(super) y: Option<f64>,
    /// (upper, lower) pixel rows of a band around `y` (uncertainty).
    pub(super) band: Option<(f64, f64)>,
    /// (upper, lower) pixel rows of the column envelope (decimated samples only).
    pub(super) env: Option<(f64, f64)>,
    pub(super) good: bool,
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
pub(super) fn drawable(samples: Vec<Px>, area: Area) -> (Vec<Px>, bool) {
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
pub(super) fn envelope(out: &mut String, series: &[Px], colour: &str, fill_opacity: &str) {
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
pub(super) fn line_path(series: &[Px]) -> (String, Vec<(f64, f64)>) {
    let mut d = String::new();
    let mut isolated = Vec::new();
    let mut run = 0usize;
    for (i, p) in series.iter().enumerate() {
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
                let next_valid = series.get(i + 1).is_some_and(|q| q.y.is_some());
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
pub(super) fn band_path(
    series: &[Px],
    pick: impl Fn(&Px) -> Option<(f64, f64)>,
) -> (String, String) {
    let mut areas = String::new();
    let mut bars = String::new();
    let mut i = 0;
    while i < series.len() {
        if pick(&series[i]).is_none() {
            i += 1;
            continue;
        }
        let start = i;
        while i < series.len() && pick(&series[i]).is_some() {
            i += 1;
        }
        let run = &series[start..i];
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
pub(super) fn gap_spans(series: &[Px], area: Area) -> Vec<(f64, f64)> {
    let mut spans: Vec<(f64, f64)> = Vec::new();
    let mut last_valid: Option<f64> = None;
    let mut open: Option<(f64, f64)> = None;
    for p in series {
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

/// A `<g>` element's identifying attribute (`id="offline"`, `class="offline"`) and the id
/// of the clip path it is drawn in.
pub(super) struct GroupAttrs<'a> {
    pub(super) attr: &'a str,
    pub(super) clip: &'a str,
}

/// Off-line periods as hatched rectangles over the whole height of `area`, in a `<g>` with
/// `group`'s attribute, one `rect.offline` per period in the time range.
pub(super) fn offline_group(
    out: &mut String,
    group: &GroupAttrs,
    spans: &[OfflineSpan],
    ts: &TimeScale,
    area: Area,
) {
    let (attr, clip) = (group.attr, group.clip);
    w!(out, "<g {attr} clip-path=\"url(#{clip})\">");
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

#[cfg(test)]
mod tests {
    use crate::plot::overview::overview_svg;
    use crate::plot::reactor::reactor_svg;
    use crate::plot::test_support::{
        by_id, check_valid, one_decimal, parse, path_d, subpaths, year_of_data,
    };

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
}
