//! Test helpers shared by the chart tests: invented data and SVG queries.

use roxmltree::{Document, Node};

use super::markers::NUMBER_FONT;
use super::model::{BaselineSpan, Marker, MarkerKind, PlotPoint, Projection, ReactorPlot};
use super::style::WIDTH;
use super::svg::text_width;
use crate::units::{DAY_MS, MINUTE_MS};

/// 2026-01-01T00:00:00Z in epoch ms (Python datetime); the start of invented test data.
pub(super) const T0: i64 = 1_767_225_600_000;

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
pub(super) fn plot_n(n: usize, step: i64) -> ReactorPlot {
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

pub(super) fn parse(svg: &str) -> Document<'_> {
    match Document::parse(svg) {
        Ok(d) => d,
        Err(e) => panic!("not valid XML: {e}\n{}", &svg[..svg.len().min(2000)]),
    }
}

pub(super) fn by_id<'a, 'i>(doc: &'a Document<'i>, id: &str) -> Node<'a, 'i> {
    let found: Vec<_> = doc
        .descendants()
        .filter(|n| n.attribute("id") == Some(id))
        .collect();
    assert_eq!(found.len(), 1, "exactly one element with id {id}");
    found[0]
}

pub(super) fn has_class(n: &Node, class: &str) -> bool {
    n.attribute("class")
        .is_some_and(|c| c.split_whitespace().any(|w| w == class))
}

/// `d` of the first `path.CLASS` under `node`.
pub(super) fn path_d(node: Node, class: &str) -> Option<String> {
    node.descendants()
        .find(|n| n.has_tag_name("path") && has_class(n, class))
        .and_then(|n| n.attribute("d"))
        .map(str::to_string)
}

pub(super) fn subpaths(d: &str) -> usize {
    d.matches('M').count()
}

pub(super) fn texts(doc: &Document) -> Vec<String> {
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

pub(super) fn check_valid(svg: &str) {
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

pub(super) const IDS: [&str; 21] = [
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

/// Every number in a path's `d` has at most one decimal place.
pub(super) fn one_decimal(d: &str) -> bool {
    d.split(|c: char| !(c.is_ascii_digit() || c == '.' || c == '-'))
        .filter(|s| !s.is_empty())
        .all(|s| s.split('.').nth(1).is_none_or(|f| f.len() <= 1))
}

/// A year of 5-minute data (105,120 points) with a 3-day bad-quality hole, some uncertain
/// points, markers and a projection (invented test data).
pub(super) fn year_of_data() -> ReactorPlot {
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

/// x positions of the tick labels under the top chart, as text.
pub(super) fn x_tick_labels(doc: &Document) -> Vec<String> {
    doc.descendants()
        .filter(|n| has_class(n, "x-axis"))
        .take(1)
        .flat_map(|g| g.children().filter(|n| n.has_tag_name("text")))
        .filter_map(|n| n.text().map(str::to_string))
        .collect()
}

pub(super) fn num(n: &Node, attr: &str) -> f64 {
    n.attribute(attr)
        .and_then(|v| v.parse::<f64>().ok())
        .unwrap_or(f64::NAN)
}

/// (x, y, width, height) of the `rect`s directly in `g.number-box` groups.
pub(super) fn number_rects(doc: &Document) -> Vec<(f64, f64, f64, f64, String)> {
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

pub(super) fn assert_no_overlap(rects: &[(f64, f64, f64, f64, String)]) {
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
pub(super) fn numbers_of(rects: &[(f64, f64, f64, f64, String)]) -> Vec<usize> {
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

/// (label, x) of the tick labels under the top chart.
pub(super) fn x_ticks_at(doc: &Document) -> Vec<(String, f64)> {
    doc.descendants()
        .filter(|n| has_class(n, "x-axis"))
        .take(1)
        .flat_map(|g| g.children().filter(|n| n.has_tag_name("text")))
        .map(|n| (n.text().unwrap_or_default().to_string(), num(&n, "x")))
        .collect()
}
