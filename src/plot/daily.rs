//! A chart of daily values: one to three lines of one value per day (a point each, a gap
//! where a day has none), an optional horizontal limit line and shaded flagged days, on a
//! time axis. Small by design (one point per day), for the period report, where several
//! charts share one HTML page: every `id` inside carries the chart's own prefix.

use std::fmt::Write as _;

use super::axes::{TimeScale, YScale, draw_time_grid, draw_y_axis, linear_axis, time_axis};
use super::legend::{Swatch, draw_legend_items, legend_item, legend_layout};
use super::model::TimeZone;
use super::series::{Px, line_path};
use super::style::{
    C_APPROACH, C_LIMIT, C_MUTED, C_OFFLINE, C_TEXT, C_TREND, DASH_LIMIT, DASH_TREND, LEFT, RIGHT,
    WIDTH,
};
use super::svg::{Area, Esc, N, clip_rect, dash_attr, draw_frame, draw_message, usable};
use crate::units::DAY_MS;

/// One line: a value per day (the day's start, epoch ms UTC), `None` for a day without one.
#[derive(Clone, Debug, PartialEq, Default)]
pub struct DailySeries {
    /// Legend text, with the unit, e.g. "approach, daily mean (K)".
    pub name: String,
    pub days: Vec<(i64, Option<f64>)>,
}

/// A horizontal line at a value, e.g. the end-of-life front depth.
#[derive(Clone, Debug, PartialEq)]
pub struct DailyLimit {
    pub value: f64,
    /// Legend text with the value and unit, e.g. "end-of-life depth 2.90 m".
    pub label: String,
}

/// Everything one daily chart shows.
#[derive(Clone, Debug, PartialEq, Default)]
pub struct DailyChart {
    /// Prefix of every `id` in the SVG (unique within the page it goes on).
    pub id: String,
    pub title: String,
    /// Value axis title with its unit, e.g. "approach (K)".
    pub y_label: String,
    /// At most three are drawn (solid, dashed, dotted).
    pub series: Vec<DailySeries>,
    pub limit: Option<DailyLimit>,
    /// Days (their start, epoch ms UTC) shaded across the chart.
    pub flagged_days: Vec<i64>,
    /// Legend text of the shading, e.g. "most global tests failed".
    pub flag_label: String,
    /// The time axis: from the first day's start to the last day's end.
    pub from_ms: i64,
    pub to_ms: i64,
    /// Depth axes grow downwards (a front moving deeper goes down the chart).
    pub inverted: bool,
}

const HEIGHT: f64 = 300.0;
const STYLES: [(&str, &str); 3] = [(C_APPROACH, ""), (C_TREND, DASH_TREND), ("#009e73", "2 3")];

/// The chart as an SVG document, times labelled in `tz`.
pub fn daily_svg(c: &DailyChart, tz: TimeZone) -> String {
    let id = sanitise_id(&c.id);
    let series = &c.series[..c.series.len().min(STYLES.len())];
    let mut items = Vec::new();
    for (s, (colour, dash)) in series.iter().zip(STYLES) {
        let swatch = Swatch::Line {
            colour,
            dash,
            width: 1.8,
        };
        items.push(legend_item(swatch, s.name.clone()));
    }
    if let Some(l) = c.limit.as_ref().filter(|l| usable(l.value)) {
        let swatch = Swatch::Line {
            colour: C_LIMIT,
            dash: DASH_LIMIT,
            width: 1.4,
        };
        items.push(legend_item(swatch, l.label.clone()));
    }
    if !c.flagged_days.is_empty() {
        items.push(legend_item(
            Swatch::Band(C_OFFLINE, 0.18),
            c.flag_label.clone(),
        ));
    }
    let (pos, rows) = legend_layout(&items, LEFT, RIGHT, 46.0);
    let top = 46.0 + 16.0 * rows.max(1) as f64;
    let height = HEIGHT + 16.0 * rows.saturating_sub(1) as f64;
    let area = Area {
        x0: LEFT,
        y0: top,
        x1: RIGHT,
        y1: height - 44.0,
    };

    let mut out = String::with_capacity(8 * 1024);
    w!(
        out,
        "<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"{w}\" height=\"{h}\" viewBox=\"0 0 {w} {h}\" \
         font-family=\"sans-serif\" font-size=\"11\" role=\"img\" aria-labelledby=\"{id}-title\">",
        w = WIDTH,
        h = N(height)
    );
    w!(
        out,
        "<title id=\"{id}-title\">{}</title><defs>",
        Esc(&c.title)
    );
    clip_rect(&mut out, &format!("{id}-clip"), area);
    w!(
        out,
        "</defs><rect width=\"{}\" height=\"{}\" fill=\"#fff\"/>\
         <text x=\"16\" y=\"24\" font-size=\"15\" font-weight=\"bold\" fill=\"{C_TEXT}\">{}</text>",
        WIDTH,
        N(height),
        Esc(&c.title)
    );

    let values: Vec<f64> = series
        .iter()
        .flat_map(|s| s.days.iter().filter_map(|d| d.1))
        .chain(c.limit.as_ref().map(|l| l.value))
        .filter(|v| usable(*v))
        .collect();
    let has_points = series
        .iter()
        .any(|s| s.days.iter().any(|d| d.1.is_some_and(usable)));
    let (lo, hi) = values
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
            (a.min(*v), b.max(*v))
        });
    let axis = linear_axis(lo, hi, 5);
    let (y_top, y_bottom) = if c.inverted {
        (area.y1, area.y0)
    } else {
        (area.y0, area.y1)
    };
    let ys = YScale {
        axis,
        top: y_top,
        bottom: y_bottom,
    };
    let (t0, t1) = (
        c.from_ms.min(c.to_ms),
        c.from_ms.max(c.to_ms).max(c.from_ms + DAY_MS),
    );
    let ta = time_axis(TimeScale::new(t0, t1, area.x0, area.x1), tz);

    // Shaded days first, under the grid and lines.
    if !c.flagged_days.is_empty() {
        w!(out, "<g id=\"{id}-flagged\">");
        for &d in &c.flagged_days {
            let (xa, xb) = (ta.scale.x(d.max(t0)), ta.scale.x((d + DAY_MS).min(t1)));
            if xb > xa {
                w!(
                    out,
                    "<rect class=\"flagged\" x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" fill=\"{C_OFFLINE}\" fill-opacity=\"0.18\"/>",
                    N(xa),
                    N(area.y0),
                    N(xb - xa),
                    N(area.h())
                );
            }
        }
        out.push_str("</g>");
    }
    draw_y_axis(&mut out, area, &ys, &c.y_label);
    draw_time_grid(&mut out, area, &ta, true);
    draw_frame(&mut out, area);
    if !has_points {
        draw_message(&mut out, area, "no data in the period");
    }
    if let Some(l) = c.limit.as_ref().filter(|l| usable(l.value))
        && let Some(y) = ys.y(l.value)
    {
        w!(
            out,
            "<line class=\"limit\" x1=\"{}\" y1=\"{y}\" x2=\"{}\" y2=\"{y}\" stroke=\"{C_LIMIT}\" stroke-width=\"1.4\"{}/>",
            N(area.x0),
            N(area.x1),
            dash_attr(DASH_LIMIT),
            y = N(y)
        );
    }
    for (i, (s, (colour, dash))) in series.iter().zip(STYLES).enumerate() {
        let mut days: Vec<&(i64, Option<f64>)> = s.days.iter().collect();
        days.sort_by_key(|d| d.0);
        // A day without a value breaks the line; so does a missing day between two.
        let mut px = Vec::with_capacity(days.len());
        let mut last_day: Option<i64> = None;
        for &&(d, v) in &days {
            if last_day.is_some_and(|p| d - p > DAY_MS) {
                px.push(point(ta.scale.x(d - DAY_MS / 2), None));
            }
            last_day = Some(d);
            let y = v.filter(|v| usable(*v)).and_then(|v| ys.y(v));
            px.push(point(ta.scale.x(d + DAY_MS / 2), y));
        }
        let (d, _) = line_path(&px);
        w!(
            out,
            "<g id=\"{id}-series-{i}\" clip-path=\"url(#{id}-clip)\"><path class=\"line\" d=\"{d}\" fill=\"none\" stroke=\"{colour}\" stroke-width=\"1.8\"{}/>",
            dash_attr(dash)
        );
        for p in &px {
            if let Some(y) = p.y {
                w!(
                    out,
                    "<circle cx=\"{}\" cy=\"{}\" r=\"2.6\" fill=\"{colour}\"/>",
                    N(p.x),
                    N(y)
                );
            }
        }
        out.push_str("</g>");
    }
    w!(
        out,
        "<text class=\"axis-label\" x=\"{}\" y=\"{}\" text-anchor=\"middle\" font-size=\"12\" fill=\"{C_TEXT}\">{}, one point per day</text>",
        N(area.mid_x()),
        N(height - 10.0),
        Esc(&ta.caption)
    );
    w!(out, "<g id=\"{id}-legend\">");
    draw_legend_items(&mut out, &items, &pos);
    w!(
        out,
        "</g><text x=\"{}\" y=\"24\" text-anchor=\"end\" font-size=\"10\" fill=\"{C_MUTED}\">advisory: not a safety function</text></svg>",
        N(RIGHT)
    );
    out
}

fn point(x: f64, y: Option<f64>) -> Px {
    Px {
        x,
        y,
        band: None,
        env: None,
        good: true,
    }
}

/// Letters, digits, `-` and `_` only (an id that came from a reactor's name).
fn sanitise_id(id: &str) -> String {
    let s: String = id
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '-' || c == '_' {
                c
            } else {
                '_'
            }
        })
        .collect();
    if s.is_empty() { "daily".into() } else { s }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::plot::test_support::parse;

    const D0: i64 = 1_788_220_800_000; // 2026-09-01T00:00:00Z (date -u -d @1788220800)

    fn chart() -> DailyChart {
        DailyChart {
            id: "lts1 front".into(),
            title: "Front <depth>".into(),
            y_label: "front depth (m)".into(),
            series: vec![DailySeries {
                name: "front depth, daily mean (m)".into(),
                days: (0..10)
                    .map(|i| (D0 + i * DAY_MS, (i != 4).then_some(1.0 + 0.05 * i as f64)))
                    .collect(),
            }],
            limit: Some(DailyLimit {
                value: 2.9,
                label: "end-of-life depth".into(),
            }),
            flagged_days: vec![D0 + 2 * DAY_MS],
            flag_label: "flagged".into(),
            from_ms: D0,
            to_ms: D0 + 10 * DAY_MS,
            inverted: true,
        }
    }

    #[test]
    fn a_daily_chart_is_well_formed_with_its_own_ids() {
        let svg = daily_svg(&chart(), TimeZone::UTC);
        let doc = parse(&svg);
        let ids: Vec<&str> = doc
            .descendants()
            .filter_map(|n| n.attribute("id"))
            .collect();
        assert!(ids.iter().all(|i| i.starts_with("lts1_front-")), "{ids:?}");
        // Nine days with a value, the gap day breaking the line into two runs.
        let circles = doc
            .descendants()
            .filter(|n| n.has_tag_name("circle"))
            .count();
        assert_eq!(circles, 9);
        let line = doc
            .descendants()
            .find(|n| n.attribute("class") == Some("line"))
            .and_then(|n| n.attribute("d"))
            .unwrap_or_default();
        assert_eq!(line.matches('M').count(), 2, "{line}");
        assert_eq!(
            doc.descendants()
                .filter(|n| n.attribute("class") == Some("flagged"))
                .count(),
            1
        );
        assert!(svg.contains("Front &lt;depth&gt;"));
        // Inverted: the deeper limit line is below the shallow points.
        let limit_y: f64 = doc
            .descendants()
            .find(|n| n.attribute("class") == Some("limit"))
            .and_then(|n| n.attribute("y1"))
            .and_then(|v| v.parse().ok())
            .unwrap_or(0.0);
        let max_point_y = doc
            .descendants()
            .filter(|n| n.has_tag_name("circle"))
            .filter_map(|n| n.attribute("cy")?.parse::<f64>().ok())
            .fold(0.0, f64::max);
        assert!(limit_y > max_point_y, "{limit_y} {max_point_y}");
    }

    #[test]
    fn no_values_say_so() {
        let mut c = chart();
        c.series[0].days.iter_mut().for_each(|d| d.1 = None);
        c.limit = None;
        let svg = daily_svg(&c, TimeZone::UTC);
        assert!(svg.contains("no data in the period"));
        parse(&svg);
    }
}
