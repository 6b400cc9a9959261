//! The plant overview: small multiples, one approach panel per reactor.

use std::fmt::Write as _;

use super::axes::{
    TimeAxis, TimeScale, YScale, draw_time_grid, draw_y_axis, fmt_date, linear_axis, time_axis,
    tz_ms,
};
use super::legend::{LegendItem, Swatch, draw_legend_items, legend_item, legend_layout};
use super::markers::{MarkerStyle, draw_markers, shown_markers};
use super::model::{MarkerKind, PlotPoint, ReactorPlot, TimeZone};
use super::prepare::sorted_points;
use super::series::{GroupAttrs, Px, drawable, envelope, gap_spans, line_path, offline_group};
use super::style::{C_APPROACH, C_GAP, C_LIMIT, C_MUTED, C_TEXT, DASH_LIMIT, LEFT, RIGHT, WIDTH};
use super::svg::{
    Area, Esc, N, clip_rect, close_defs_and_title, dash_attr, draw_frame, draw_message, fmt_sig,
    sane_t, usable,
};

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
    let sorted: Vec<Vec<&PlotPoint>> = plots
        .iter()
        .map(|plot| sorted_points(&plot.points))
        .collect();
    let items = overview_legend(plots, &sorted);
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
    close_defs_and_title(&mut out, height, title);

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
    for (i, (plot, pts)) in plots.iter().zip(&sorted).enumerate() {
        let area = panel_area(i);
        let last = i + 1 == n;
        let place = PanelPlace {
            index: i + 1,
            ta: ta.as_ref(),
            area,
            last,
        };
        overview_panel(&mut out, plot, pts, &place);
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

/// Legend entries of the overview: only what some panel has.
fn overview_legend(plots: &[ReactorPlot], sorted: &[Vec<&PlotPoint>]) -> Vec<LegendItem> {
    let mut items = vec![legend_item(
        Swatch::Line {
            colour: C_APPROACH,
            dash: "",
            width: 1.8,
        },
        "approach (K)",
    )];
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
    items
}

/// Where one reactor's panel goes: its number (from 1), the shared time axis (`None` when
/// no reactor has data), its area, and whether it is the last (the one with time labels).
struct PanelPlace<'a> {
    index: usize,
    ta: Option<&'a TimeAxis>,
    area: Area,
    last: bool,
}

/// One reactor's row of the overview, in `<g class="panel" id="panel-N">` with classes
/// (not ids, which must be unique) for its parts.
fn overview_panel(out: &mut String, plot: &ReactorPlot, pts: &[&PlotPoint], place: &PanelPlace) {
    let (index, ta, area, last) = (place.index, place.ta, place.area, place.last);
    w!(
        out,
        "<g class=\"panel\" id=\"panel-{index}\" data-reactor=\"{}\">",
        Esc(&plot.reactor)
    );
    panel_heading(out, plot, ta, area);
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
    let (ys, has_axis) = panel_y_scale(plot, pts, area);
    let clip = format!("clip-panel-{index}");
    let group = GroupAttrs {
        attr: "class=\"offline\"",
        clip: &clip,
    };
    offline_group(out, &group, &plot.offline, &ts, area);
    draw_time_grid(out, area, ta, last);
    if has_axis {
        draw_y_axis(out, area, &ys, "approach (K)");
    }
    let samples = panel_samples(pts, &ts, &ys, has_axis);
    let gaps = gap_spans(&samples, area);
    let (series, decimated) = drawable(samples, area);
    let clip = format!("clip-path=\"url(#clip-panel-{index})\"");
    panel_gaps(out, &gaps, area, &clip);
    panel_limit(out, plot, &ys, area, has_axis);
    panel_line(out, &series, decimated, &clip);
    out.push_str("<g class=\"markers\">");
    let style = MarkerStyle {
        radius: 4.0,
        numbered: false,
    };
    draw_markers(out, &shown_markers(&plot.markers, &ts), ta, area, style);
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

/// The panel's heading: the title (else the reactor) and the end of run when forecast.
fn panel_heading(out: &mut String, plot: &ReactorPlot, ta: Option<&TimeAxis>, area: Area) {
    let mut heading = if plot.title.trim().is_empty() {
        plot.reactor.clone()
    } else {
        plot.title.clone()
    };
    if let Some(e) = plot
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
}

/// Each point in pixels (the overview draws no uncertainty band).
fn panel_samples(pts: &[&PlotPoint], ts: &TimeScale, ys: &YScale, has_axis: bool) -> Vec<Px> {
    pts.iter()
        .map(|q| Px {
            x: ts.x(q.t_ms),
            y: q.approach_k
                .filter(|v| has_axis && usable(*v))
                .and_then(|v| ys.y(v)),
            band: None,
            env: None,
            good: q.good,
        })
        .collect()
}

/// Bad-quality gaps, shaded over the whole height.
fn panel_gaps(out: &mut String, gaps: &[(f64, f64)], area: Area, clip: &str) {
    w!(
        out,
        "<g class=\"gaps\" {clip} fill=\"{C_GAP}\" fill-opacity=\"0.22\">"
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

/// The end-of-run limit line with its label.
fn panel_limit(out: &mut String, plot: &ReactorPlot, ys: &YScale, area: Area, has_axis: bool) {
    out.push_str("<g class=\"limit\">");
    if let Some((l, y)) = plot
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
    out.push_str("</g>");
}

/// The approach line (with its envelope when decimated) and its lone points.
fn panel_line(out: &mut String, series: &[Px], decimated: bool, clip: &str) {
    w!(out, "<g class=\"approach\" {clip}>");
    if decimated {
        envelope(out, series, C_APPROACH, "0.18");
    }
    let (line, isolated) = line_path(series);
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
    out.push_str("</g>");
}

/// The panel's value scale (approach and limit, from zero when that is near), and whether
/// any value gave it an axis.
fn panel_y_scale(plot: &ReactorPlot, pts: &[&PlotPoint], area: Area) -> (YScale, bool) {
    let core = pts
        .iter()
        .filter_map(|q| q.approach_k)
        .chain(plot.limit_k)
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
    (ys, has_axis)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::plot::model::{Marker, MarkerKind, ReactorPlot};
    use crate::plot::test_support::{
        T0, check_valid, has_class, parse, path_d, plot_n, subpaths, texts,
    };
    use crate::units::HOUR_MS;
    use roxmltree::Node;

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
}
