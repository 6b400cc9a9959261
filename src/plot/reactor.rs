//! The per-reactor document: the approach chart over the key-component chart on one time
//! axis, marker numbers, the event list, legends, title and footer.

use std::fmt::Write as _;

use super::approach::{ApproachFrame, approach_chart, approach_legend, approach_y_range};
use super::axes::{TimeAxis, TimeScale, left_for, linear_axis, tick_label_w, time_axis};
use super::key::{key_axis, key_chart, key_values};
use super::legend::{LegendItem, Swatch, draw_legend_items, legend_item, legend_layout};
use super::markers::{
    NumberBox, draw_event_list, draw_number_boxes, event_list_h, number_boxes, number_strip_h,
    shown_markers,
};
use super::model::{Marker, ReactorPlot, TimeZone};
use super::prepare::{Domain, Prepared, clip_projection};
use super::style::{
    C_EQUILIBRIUM, C_MEASURED, C_MUTED, C_TEXT, DASH_EQUILIBRIUM, HEIGHT, LEFT, RIGHT, WIDTH,
};
use super::svg::{
    Area, Esc, N, clip_rect, close_defs_and_title, draw_frame, draw_message, text_width,
};

/// One SVG document for one reactor, times in UTC: see [`reactor_svg_tz`].
pub fn reactor_svg(plot: &ReactorPlot) -> String {
    reactor_svg_tz(plot, TimeZone::UTC)
}

/// One SVG document for one reactor: the approach to equilibrium (top) and the key component,
/// measured and at equilibrium (bottom), on a shared time axis labelled in `tz`; numbered
/// event markers with their list under the charts. 1000 px wide, 640 px high plus the room
/// that marker numbers and the event list take.
pub fn reactor_svg_tz(plot: &ReactorPlot, tz: TimeZone) -> String {
    let data = Prepared::new(plot);
    let layout = reactor_layout(&data, tz);
    let mut out = String::with_capacity(96 * 1024);
    open_document(&mut out, &data, &layout);
    match (&data.domain, &layout.ta) {
        (Some(d), Some(ta)) => draw_charts(&mut out, &data, &layout, d, ta),
        _ => draw_no_data(&mut out, &layout, tz),
    }
    close_document(&mut out, &data, &layout);
    out
}

/// Where everything goes in the per-reactor document.
struct Layout<'a> {
    left: f64,
    /// `None` when nothing has a plottable time.
    ta: Option<TimeAxis>,
    shown: Vec<&'a Marker>,
    boxes: Vec<NumberBox>,
    /// The height of the marker-number strip; the charts move down by it.
    dy: f64,
    height: f64,
    items: Vec<LegendItem>,
    legend_pos: Vec<(f64, f64)>,
    heading_y: f64,
    top: Area,
    bottom: Area,
    key_items: Vec<LegendItem>,
    key_pos: Vec<(f64, f64)>,
    key_heading: String,
}

/// The margins, the time axis, the markers shown with their numbers, the legends and the
/// chart areas.
fn reactor_layout<'a>(data: &Prepared<'a>, tz: TimeZone) -> Layout<'a> {
    let (plot, pts, proj_all, domain, key, basis) = (
        data.plot,
        &data.points,
        &data.projection,
        &data.domain,
        data.key,
        data.basis,
    );
    // Left margin from the widest tick label of either chart (same for both).
    let left = match domain {
        Some(d) => {
            let ts = TimeScale::new(d.t0, d.t1, LEFT, RIGHT);
            let proj = clip_projection(proj_all, ts.t0, ts.t1);
            let a = approach_y_range(plot, pts, &proj, &ts)
                .map_or(0.0, |(lo, hi)| tick_label_w(&linear_axis(lo, hi, 6)));
            let k = key_axis(&key_values(pts)).map_or(0.0, |(_, _, ax)| tick_label_w(&ax));
            left_for(a.max(k))
        }
        None => LEFT,
    };
    let ta = domain
        .as_ref()
        .map(|d| time_axis(TimeScale::new(d.t0, d.t1, left, RIGHT), tz));
    let shown: Vec<&Marker> = ta
        .as_ref()
        .map(|ta| shown_markers(&plot.markers, &ta.scale))
        .unwrap_or_default();
    let xs: Vec<f64> = match &ta {
        Some(ta) => shown.iter().map(|m| ta.scale.x(m.t_ms)).collect(),
        None => Vec::new(),
    };
    let (boxes, lanes) = number_boxes(&xs, 0.0 + 4.0, WIDTH - 4.0);
    let strip = number_strip_h(lanes);
    let list_h = event_list_h(shown.len());
    let height = (HEIGHT + strip + list_h).ceil();

    // Legend first (its height sets where the top chart starts); drawn at the end.
    let items = approach_legend(plot, pts, proj_all);
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

    Layout {
        left,
        ta,
        shown,
        boxes,
        dy,
        height,
        items,
        legend_pos,
        heading_y,
        top,
        bottom,
        key_items,
        key_pos,
        key_heading,
    }
}

/// The root element, title and description, clip paths, background and headings.
fn open_document(out: &mut String, data: &Prepared, layout: &Layout) {
    let (plot, key, title, basis) = (data.plot, data.key, data.title, data.basis);
    let (left, heading_y, dy, height) = (layout.left, layout.heading_y, layout.dy, layout.height);
    let (top, bottom, key_heading) = (layout.top, layout.bottom, &layout.key_heading);
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
        Esc(&plot.reactor),
        Esc(key),
        basis.map_or(String::new(), |b| format!(" ({} basis)", Esc(b)))
    );

    out.push_str("<defs>");
    clip_rect(out, "clip-approach", top);
    clip_rect(out, "clip-key", bottom);
    close_defs_and_title(out, height, title);
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
        Esc(key_heading)
    );
}

/// Both charts, the marker numbers, the time caption and the event list.
fn draw_charts(out: &mut String, data: &Prepared, layout: &Layout, d: &Domain, ta: &TimeAxis) {
    let (top, bottom, shown, boxes) = (layout.top, layout.bottom, &layout.shown[..], &layout.boxes);
    let caption_y = 612.0 + layout.dy;
    approach_chart(
        out,
        data,
        d,
        &ApproachFrame {
            ta,
            area: top,
            shown,
        },
    );
    draw_number_boxes(out, boxes, shown, top);
    key_chart(out, data, ta, bottom);
    w!(
        out,
        "<text class=\"axis-label\" x=\"{}\" y=\"{}\" text-anchor=\"middle\" font-size=\"12\" fill=\"{C_TEXT}\">{}</text>",
        N(bottom.mid_x()),
        N(caption_y),
        Esc(&ta.caption)
    );
    draw_event_list(out, shown, ta, caption_y + 8.0);
}

/// Every group empty, "no data" in both frames, and the time caption.
fn draw_no_data(out: &mut String, layout: &Layout, tz: TimeZone) {
    let (top, bottom) = (layout.top, layout.bottom);
    let caption_y = 612.0 + layout.dy;
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
    out.push_str("<g id=\"key-offline\"/><g id=\"key-measured\"/><g id=\"key-equilibrium\"/>");
    draw_frame(out, top);
    draw_message(out, top, "no data");
    draw_frame(out, bottom);
    draw_message(out, bottom, "no data");
    w!(
        out,
        "<text class=\"axis-label\" x=\"{}\" y=\"{}\" text-anchor=\"middle\" font-size=\"12\" fill=\"{C_TEXT}\">time ({})</text>",
        N(bottom.mid_x()),
        N(caption_y),
        Esc(&tz.name())
    );
}

/// The footer and both legends.
fn close_document(out: &mut String, data: &Prepared, layout: &Layout) {
    let (plot, height) = (data.plot, layout.height);
    w!(
        out,
        "<text class=\"footer\" x=\"16\" y=\"{}\" font-size=\"10\" fill=\"{C_MUTED}\">advisory: not a safety function. \
         eqwatch{}{}</text>",
        N(height - 8.0),
        if plot.reactor.is_empty() {
            ""
        } else {
            ", reactor "
        },
        Esc(&plot.reactor)
    );
    out.push_str("<g id=\"legend\">");
    draw_legend_items(out, &layout.items, &layout.legend_pos);
    draw_legend_items(out, &layout.key_items, &layout.key_pos);
    out.push_str("</g></svg>\n");
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::plot::model::{BaselineSpan, Marker, MarkerKind, Projection, ReactorPlot};
    use crate::plot::overview::overview_svg;
    use crate::plot::test_support::{IDS, T0, by_id, check_valid, parse, plot_n, texts};
    use crate::units::{DAY_MS, HOUR_MS};

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
}
