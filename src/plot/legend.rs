//! Legends: swatches, entries laid out in rows, and drawing them.

use std::fmt::Write as _;

use super::approach::aggregate_shape;
use super::markers::marker_shape;
use super::model::MarkerKind;
use super::style::{C_OFFLINE, C_TEXT};
use super::svg::{Esc, N, dash_attr, text_width};

/// What a legend entry shows before its text.
#[derive(Clone, Copy)]
pub(super) enum Swatch {
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

pub(super) struct LegendItem {
    swatch: Swatch,
    pub(super) text: String,
}

pub(super) fn legend_item(swatch: Swatch, text: impl Into<String>) -> LegendItem {
    LegendItem {
        swatch,
        text: text.into(),
    }
}

/// Places entries left to right from `x0`, wrapping before `x1`; returns (x, baseline y) per
/// entry and the number of rows.
pub(super) fn legend_layout(
    items: &[LegendItem],
    x0: f64,
    x1: f64,
    y: f64,
) -> (Vec<(f64, f64)>, usize) {
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

pub(super) fn draw_legend_items(out: &mut String, items: &[LegendItem], pos: &[(f64, f64)]) {
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
