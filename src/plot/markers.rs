//! Event markers: shapes per kind, the numbers above the chart (stacked in lanes, a run of
//! close markers sharing one box) and the numbered event list under the charts.

use std::fmt::Write as _;

use super::axes::{TimeAxis, TimeScale};
use super::model::{Marker, MarkerKind};
use super::style::{C_MUTED, C_TEXT};
use super::svg::{Area, Esc, N, dash_attr, sane_t, text_width};

/// A marker's shape centred at (x, y), size `r` px; each kind has its own shape.
pub(super) fn marker_shape(out: &mut String, kind: MarkerKind, x: f64, y: f64, r: f64) {
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
pub(super) fn shown_markers<'a>(markers: &'a [Marker], ts: &TimeScale) -> Vec<&'a Marker> {
    let mut v: Vec<&Marker> = markers
        .iter()
        .filter(|m| sane_t(m.t_ms) && ts.contains(m.t_ms))
        .collect();
    v.sort_by_key(|m| m.t_ms);
    v
}

/// The markers as vertical lines with a shape at the top, each in a
/// `<g class="marker KIND">` with a `<title>` (and its number when `numbered`).
/// How markers are drawn: the shape's radius (px), and whether each carries its number.
#[derive(Clone, Copy)]
pub(super) struct MarkerStyle {
    pub(super) radius: f64,
    pub(super) numbered: bool,
}

pub(super) fn draw_markers(
    out: &mut String,
    shown: &[&Marker],
    ta: &TimeAxis,
    area: Area,
    style: MarkerStyle,
) {
    let (r, numbered) = (style.radius, style.numbered);
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
pub(super) const NUMBER_FONT: f64 = 9.0;

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
pub(super) struct NumberBox {
    /// First and last marker number (from 1, time order).
    pub(super) first: usize,
    pub(super) last: usize,
    /// The markers' x extent (px).
    mx0: f64,
    mx1: f64,
    /// Box left and right (px) and lane (0 next to the chart).
    pub(super) x0: f64,
    pub(super) x1: f64,
    lane: usize,
}

impl NumberBox {
    pub(super) fn text(&self) -> String {
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
pub(super) fn number_boxes(xs: &[f64], lo: f64, hi: f64) -> (Vec<NumberBox>, usize) {
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
pub(super) fn number_strip_h(lanes: usize) -> f64 {
    if lanes == 0 {
        0.0
    } else {
        lanes as f64 * LANE_H + 8.0
    }
}

/// The number boxes above `area` (`<g id="marker-numbers">`, each `g.number-box` with a
/// `rect` and its `text`), with a thin leader from each box to its markers.
pub(super) fn draw_number_boxes(
    out: &mut String,
    boxes: &[NumberBox],
    shown: &[&Marker],
    area: Area,
) {
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
pub(super) fn event_list_h(n: usize) -> f64 {
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
pub(super) fn draw_event_list(out: &mut String, shown: &[&Marker], ta: &TimeAxis, y0: f64) {
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::plot::axes::fmt_datetime;
    use crate::plot::model::{Marker, MarkerKind};
    use crate::plot::reactor::reactor_svg;
    use crate::plot::style::{HEIGHT, WIDTH};
    use crate::plot::svg::text_width;
    use crate::plot::test_support::{
        T0, assert_no_overlap, by_id, check_valid, has_class, num, number_rects, numbers_of, parse,
        plot_n, texts,
    };
    use crate::units::{DAY_MS, HOUR_MS, MINUTE_MS};
    use roxmltree::Node;

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
}
