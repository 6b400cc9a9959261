//! The approach chart (top of the per-reactor document): uncertainty band, gaps, approach
//! line, baselines, trend and projection, limits, aggregates, off-line spans, end of run
//! and markers.

use std::fmt::Write as _;

use super::axes::{TimeAxis, TimeScale, YScale, draw_time_grid, draw_y_axis, linear_axis};
use super::legend::{LegendItem, Swatch, legend_item};
use super::markers::{MarkerStyle, draw_markers};
use super::model::{AlarmLimit, Marker, MarkerKind, PlotPoint, ReactorPlot};
use super::prepare::{Domain, Prepared, ProjPt, clip_projection};
use super::series::{
    GroupAttrs, Px, band_path, drawable, envelope, gap_spans, line_path, offline_group,
};
use super::style::{
    C_AGGREGATE, C_ALARM_LIMIT, C_APPROACH, C_BAND, C_BASELINE, C_END_OF_RUN, C_GAP, C_LIMIT,
    C_MUTED, C_PROJ_BAND, C_TEXT, C_TREND, DASH_ALARM_LIMIT, DASH_BASELINE, DASH_END_OF_RUN,
    DASH_FORWARD, DASH_LIMIT, DASH_TREND,
};
use super::svg::{
    Area, Esc, N, dash_attr, draw_frame, draw_message, fmt_sig, sane_t, text_width, usable,
    usable_fraction,
};
use crate::units::{DAY_MS, HOUR_MS};

/// Legend entries of the approach chart: only what the chart has.
pub(super) fn approach_legend(
    plot: &ReactorPlot,
    pts: &[&PlotPoint],
    proj: &[ProjPt],
) -> Vec<LegendItem> {
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
    if plot
        .offline
        .iter()
        .any(|o| sane_t(o.from_ms) && sane_t(o.to_ms))
    {
        v.push(legend_item(Swatch::Hatch, "unit off line"));
    }
    if plot.baselines.iter().any(|b| usable(b.approach_k)) {
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
    let aggs = || plot.aggregates.iter().filter(|a| usable(a.approach_k));
    let mean = aggregate_name(plot.aggregate_period_ms);
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
    if plot.limit_k.is_some_and(usable) {
        v.push(legend_item(
            Swatch::Line {
                colour: C_LIMIT,
                dash: DASH_LIMIT,
                width: 1.6,
            },
            "end-of-run limit",
        ));
    }
    if plot.alarm_limits.iter().any(|a| usable(a.limit_k)) {
        v.push(legend_item(
            Swatch::Line {
                colour: C_ALARM_LIMIT,
                dash: DASH_ALARM_LIMIT,
                width: 1.4,
            },
            "operator alarm limit",
        ));
    }
    if plot
        .projection
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
        if plot.markers.iter().any(|m| m.kind == kind) {
            v.push(legend_item(Swatch::Marker(kind), kind.class()));
        }
    }
    v
}

/// The y range of the approach chart: approach values, baselines, trend and limit set it;
/// uncertainty and prediction bands may widen it by at most half of that range.
pub(super) fn approach_y_range(
    plot: &ReactorPlot,
    pts: &[&PlotPoint],
    proj: &[ProjPt],
    ts: &TimeScale,
) -> Option<(f64, f64)> {
    let baselines = plot.baselines.iter().filter(|b| {
        usable(b.approach_k) && b.from_ms.min(b.to_ms) <= ts.t1 && b.from_ms.max(b.to_ms) >= ts.t0
    });
    let core = pts
        .iter()
        .filter_map(|q| q.approach_k)
        .chain(baselines.clone().map(|b| b.approach_k))
        .chain(proj.iter().map(|q| q.fit))
        .chain(plot.limit_k)
        .chain(plot.alarm_limits.iter().map(|a| a.limit_k))
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

/// Where the approach chart goes in the document: its time axis, its area and the markers
/// shown on it.
pub(super) struct ApproachFrame<'a> {
    pub(super) ta: &'a TimeAxis,
    pub(super) area: Area,
    pub(super) shown: &'a [&'a Marker],
}

/// What every layer of the approach chart is drawn against.
struct Layers<'a> {
    plot: &'a ReactorPlot,
    ta: &'a TimeAxis,
    ys: &'a YScale,
    area: Area,
    /// Some value gave the chart a y axis; without one, layers that need values draw nothing.
    has_axis: bool,
}

/// The top chart. Groups are always written (possibly empty) so that the structure is stable.
pub(super) fn approach_chart(
    out: &mut String,
    data: &Prepared,
    domain: &Domain,
    frame: &ApproachFrame,
) {
    let (plot, pts, ta, area) = (data.plot, &data.points[..], frame.ta, frame.area);
    let ts = ta.scale;
    let proj = clip_projection(&data.projection, ts.t0, ts.t1);
    let range = approach_y_range(plot, pts, &proj, &ts);
    let ys = YScale {
        axis: match range {
            Some((lo, hi)) => linear_axis(lo, hi, 6),
            None => linear_axis(0.0, 1.0, 6),
        },
        top: area.y0,
        bottom: area.y1,
    };
    draw_time_grid(out, area, ta, true);
    let group = GroupAttrs {
        attr: "id=\"offline\"",
        clip: "clip-approach",
    };
    offline_group(out, &group, &plot.offline, &ts, area);
    approach_axis(out, area, &ys, range.is_some());
    let layers = Layers {
        plot,
        ta,
        ys: &ys,
        area,
        has_axis: range.is_some(),
    };

    let samples = approach_samples(pts, &layers);
    let gaps = gap_spans(&data_present(&samples, pts, area), area);
    let (series, decimated) = drawable(samples, area);
    gaps_group(out, &gaps, area);
    uncertainty_group(out, &series);
    projection_groups(out, &layers, &proj, domain);
    limit_groups(out, &layers);
    let n_valid = approach_line_group(out, &series, decimated);
    uncertain_quality_group(out, &series);
    aggregates_group(out, &layers);
    baselines_group(out, &layers);
    end_of_run_group(out, &layers);
    markers_group(out, plot, frame);

    draw_frame(out, area);
    if n_valid == 0 {
        draw_message(
            out,
            area,
            "no approach value (where the equilibrium is below the analyser's detection limit, watch the key component)",
        );
    }
}

/// The clip path of every group inside the approach chart's area.
const CLIP: &str = "clip-path=\"url(#clip-approach)\"";

/// The value axis, or only its title when no value gave the chart a scale.
fn approach_axis(out: &mut String, area: Area, ys: &YScale, has_axis: bool) {
    if has_axis {
        draw_y_axis(out, area, ys, "approach to equilibrium (K)");
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
}

/// Each point in pixels, with its uncertainty band.
fn approach_samples(pts: &[&PlotPoint], layers: &Layers) -> Vec<Px> {
    let (ts, ys, has_axis) = (&layers.ta.scale, layers.ys, layers.has_axis);
    pts.iter()
        .map(|q| {
            let a = q.approach_k.filter(|v| usable(*v));
            let y = if has_axis {
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
        .collect()
}

/// Where a result is present: a time without a usable result is a gap; a result whose
/// approach is only not meaningful (the key component still measured, as at a methanator)
/// is no gap.
fn data_present(samples: &[Px], pts: &[&PlotPoint], area: Area) -> Vec<Px> {
    samples
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
        .collect()
}

/// Bad-quality gaps, shaded over the whole height.
fn gaps_group(out: &mut String, gaps: &[(f64, f64)], area: Area) {
    w!(
        out,
        "<g id=\"gaps\" {CLIP} fill=\"{C_GAP}\" fill-opacity=\"0.22\">"
    );
    for (a, b) in gaps {
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
}

/// The uncertainty band (bars where a point stands alone).
fn uncertainty_group(out: &mut String, series: &[Px]) {
    let (band, bars) = band_path(series, |q| q.band);
    w!(out, "<g id=\"uncertainty\" {CLIP}>");
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
}

/// The approach line (with its envelope when decimated) and its points where they can be
/// told apart; returns how many columns or points have a value.
fn approach_line_group(out: &mut String, series: &[Px], decimated: bool) -> usize {
    w!(out, "<g id=\"approach\" {CLIP}>");
    if decimated {
        envelope(out, series, C_APPROACH, "0.18");
    }
    let (line, isolated) = line_path(series);
    if !line.is_empty() {
        w!(
            out,
            "<path class=\"line\" d=\"{line}\" fill=\"none\" stroke=\"{C_APPROACH}\" stroke-width=\"1.8\" stroke-linejoin=\"round\"/>"
        );
    }
    let n_valid = series.iter().filter(|q| q.y.is_some()).count();
    for q in series {
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
    n_valid
}

/// Uncertain quality: hollow circles (per column when decimated).
fn uncertain_quality_group(out: &mut String, series: &[Px]) {
    w!(
        out,
        "<g id=\"uncertain-quality\" {CLIP} fill=\"#fff\" stroke=\"{C_APPROACH}\" stroke-width=\"1.3\">"
    );
    for q in series.iter().filter(|q| !q.good) {
        if let Some(y) = q.y {
            w!(out, "<circle cx=\"{}\" cy=\"{}\" r=\"3\"/>", N(q.x), N(y));
        }
    }
    out.push_str("</g>");
}

/// The markers shown, and a note counting those outside the time range.
fn markers_group(out: &mut String, plot: &ReactorPlot, frame: &ApproachFrame) {
    let (shown, area) = (frame.shown, frame.area);
    out.push_str("<g id=\"markers\">");
    let style = MarkerStyle {
        radius: 5.5,
        numbered: true,
    };
    draw_markers(out, shown, frame.ta, area, style);
    let outside = plot.markers.len() - shown.len();
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
}

fn baselines_group(out: &mut String, layers: &Layers) {
    let (plot, ta, ys, area, has_axis) = (
        layers.plot,
        layers.ta,
        layers.ys,
        layers.area,
        layers.has_axis,
    );
    let ts = &ta.scale;
    w!(out, "<g id=\"baseline\" clip-path=\"url(#clip-approach)\">");
    for b in plot.baselines.iter().filter(|_| has_axis) {
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
fn projection_groups(out: &mut String, layers: &Layers, proj: &[ProjPt], domain: &Domain) {
    let (plot, ts, ys, has_axis) = (layers.plot, &layers.ta.scale, layers.ys, layers.has_axis);
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
        let forward = to_px(&clip_projection(proj, domain.data_end, ts.t1), false);
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
        let fit = to_px(&clip_projection(proj, ts.t0, domain.data_end), false);
        let (line, _) = line_path(&fit);
        if fit.len() > 1 && !line.is_empty() {
            w!(
                out,
                "<path class=\"line\" d=\"{line}\" {clip} fill=\"none\" stroke=\"{C_TREND}\" stroke-width=\"1.6\"{}/>",
                dash_attr(DASH_TREND)
            );
        }
        if let Some(pr) = plot
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
/// One horizontal limit line: where it is, its label, and its alarm (`None` for the
/// end-of-run limit).
struct LimitLine<'a> {
    y: f64,
    text: String,
    alarm: Option<&'a AlarmLimit>,
}

fn limit_groups(out: &mut String, layers: &Layers) {
    let (plot, area) = (layers.plot, layers.area);
    let lines = limit_lines(layers);
    let label_y = limit_label_ys(&lines, area);
    let label_x = limit_label_x(plot, &lines, &layers.ta.scale, area);
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
    for (i, line) in lines.iter().enumerate().filter(|(_, l)| l.alarm.is_none()) {
        path(out, line.y, C_LIMIT, DASH_LIMIT, "1.6");
        label(out, label_y[i], C_LIMIT, &line.text);
    }
    out.push_str("</g><g id=\"alarm-limits\">");
    for (i, line) in lines.iter().enumerate() {
        let Some(a) = line.alarm else { continue };
        w!(
            out,
            "<g class=\"alarm-limit\" data-id=\"{}\" data-limit-k=\"{}\"><title>operator alarm {}: {} K</title>",
            Esc(&a.id),
            fmt_sig(a.limit_k, 6),
            Esc(&a.id),
            fmt_sig(a.limit_k, 6)
        );
        path(out, line.y, C_ALARM_LIMIT, DASH_ALARM_LIMIT, "1.4");
        label(out, label_y[i], C_ALARM_LIMIT, &line.text);
        out.push_str("</g>");
    }
    out.push_str("</g>");
}

/// The end-of-run limit and the operator alarm limits inside the value axis.
fn limit_lines<'a>(layers: &Layers<'a>) -> Vec<LimitLine<'a>> {
    let (plot, ys, has_axis) = (layers.plot, layers.ys, layers.has_axis);
    let mut lines = Vec::new();
    if let Some((l, y)) = plot
        .limit_k
        .filter(|l| has_axis && usable(*l))
        .and_then(|l| ys.y(l).map(|y| (l, y)))
    {
        lines.push(LimitLine {
            y,
            text: format!("end-of-run limit {} K", fmt_sig(l, 3)),
            alarm: None,
        });
    }
    for a in plot
        .alarm_limits
        .iter()
        .filter(|a| has_axis && usable(a.limit_k))
    {
        if let Some(y) = ys.y(a.limit_k) {
            lines.push(LimitLine {
                y,
                text: format!(
                    "operator alarm {} ({}) {} K",
                    a.id,
                    if a.high { "high" } else { "low" },
                    fmt_sig(a.limit_k, 3)
                ),
                alarm: Some(a),
            });
        }
    }
    lines
}

/// Label heights, in the order of `lines`.
fn limit_label_ys(lines: &[LimitLine], area: Area) -> Vec<f64> {
    // Labels just below their lines (the end-of-run interval bar sits on the limit line),
    // at least 12 px apart, inside the area.
    let mut order: Vec<usize> = (0..lines.len()).collect();
    order.sort_by(|&i, &j| lines[i].y.total_cmp(&lines[j].y));
    let mut label_y = vec![0.0; lines.len()];
    let mut prev = f64::NEG_INFINITY;
    for &i in &order {
        let y = (lines[i].y + 13.0).max(prev + 12.0).max(area.y0 + 12.0);
        label_y[i] = y;
        prev = y;
    }
    let mut next = area.y1 - 3.0 + 12.0;
    for &i in order.iter().rev() {
        label_y[i] = label_y[i].min(next - 12.0);
        next = label_y[i];
    }
    label_y
}

/// Where the labels end.
fn limit_label_x(plot: &ReactorPlot, lines: &[LimitLine], ts: &TimeScale, area: Area) -> f64 {
    // Right-aligned at the right edge, or left of the end-of-run line when that is near it.
    let widest = lines
        .iter()
        .map(|l| text_width(&l.text, 10.0))
        .fold(0.0, f64::max);
    plot.projection
        .as_ref()
        .and_then(|pr| pr.end_of_run_ms)
        .filter(|&e| sane_t(e) && ts.contains(e))
        .map(|e| ts.x(e))
        .filter(|&ex| ex > area.x1 - widest - 8.0 && ex - 6.0 - widest > area.x0)
        .map_or(area.x1 - 4.0, |ex| ex - 6.0)
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
pub(super) fn aggregate_shape(out: &mut String, x: f64, y: f64, filled: bool) {
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
fn aggregates_group(out: &mut String, layers: &Layers) {
    let (plot, ts, ys, has_axis) = (layers.plot, &layers.ta.scale, layers.ys, layers.has_axis);
    out.push_str("<g id=\"aggregates\" clip-path=\"url(#clip-approach)\">");
    for a in &plot.aggregates {
        if !has_axis || !usable(a.approach_k) || !sane_t(a.t_ms) || !ts.contains(a.t_ms) {
            continue;
        }
        if let Some(y) = ys.y(a.approach_k) {
            aggregate_shape(out, ts.x(a.t_ms), y, a.in_fit);
        }
    }
    out.push_str("</g>");
}

fn end_of_run_group(out: &mut String, layers: &Layers) {
    let (plot, ta, ys, area, has_axis) = (
        layers.plot,
        layers.ta,
        layers.ys,
        layers.area,
        layers.has_axis,
    );
    let ts = ta.scale;
    out.push_str("<g id=\"end-of-run\">");
    let Some(pr) = &plot.projection else {
        out.push_str("</g>");
        return;
    };
    let limit_y = plot
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

#[cfg(test)]
mod tests {
    use crate::plot::model::{AggregatePoint, AlarmLimit, OfflineSpan};
    use crate::plot::reactor::reactor_svg;
    use crate::plot::style::{LEFT, RIGHT};
    use crate::plot::test_support::{
        T0, by_id, has_class, num, parse, path_d, plot_n, subpaths, texts,
    };
    use crate::units::{DAY_MS, HOUR_MS};
    use roxmltree::Node;

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
}
