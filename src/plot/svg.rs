//! SVG writing helpers: XML escaping, coordinates with one decimal, number formatting, text
//! widths, the limits of what is drawn (usable values and times), plot areas, clip paths,
//! frames and messages.

use std::fmt::{self, Write as _};

use super::style::{C_FRAME, C_MUTED, C_OFFLINE, C_TEXT, WIDTH};

/// Earliest plotted instant, 0001-01-01T00:00:00Z (checked with Python's datetime module).
const T_LO: i64 = -62_135_596_800_000;

/// Latest plotted instant, 9999-12-31T23:59:59.999Z (checked with Python's datetime module).
const T_HI: i64 = 253_402_300_799_999;

/// Values beyond this magnitude are treated like NaN (no approach or mole fraction is near).
const V_MAX: f64 = 1e15;

/// XML-escaped text; characters that XML 1.0 forbids become spaces.
pub(super) struct Esc<'a>(pub(super) &'a str);

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
pub(super) struct N(pub(super) f64);

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
pub(super) fn text_width(s: &str, size: f64) -> f64 {
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
pub(super) fn fmt_fixed(v: f64, dec: usize) -> String {
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
pub(super) fn fmt_sig(v: f64, sig: i32) -> String {
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
pub(super) fn usable_fraction(v: f64) -> bool {
    (-1e-3..=1.001).contains(&v)
}

pub(super) fn usable(v: f64) -> bool {
    v.is_finite() && v.abs() < V_MAX
}

pub(super) fn sane_t(t: i64) -> bool {
    (T_LO..=T_HI).contains(&t)
}

/// Pixel rectangle of one plot area.
#[derive(Clone, Copy, Debug)]
pub(super) struct Area {
    pub(super) x0: f64,
    pub(super) y0: f64,
    pub(super) x1: f64,
    pub(super) y1: f64,
}

impl Area {
    pub(super) fn w(&self) -> f64 {
        self.x1 - self.x0
    }
    pub(super) fn h(&self) -> f64 {
        self.y1 - self.y0
    }
    pub(super) fn mid_x(&self) -> f64 {
        0.5 * (self.x0 + self.x1)
    }
    pub(super) fn mid_y(&self) -> f64 {
        0.5 * (self.y0 + self.y1)
    }
}

/// `stroke-dasharray` attribute, or nothing for a solid line.
pub(super) fn dash_attr(dash: &str) -> String {
    if dash.is_empty() {
        String::new()
    } else {
        format!(" stroke-dasharray=\"{dash}\"")
    }
}

pub(super) fn clip_rect(out: &mut String, id: &str, a: Area) {
    w!(
        out,
        "<clipPath id=\"{id}\"><rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\"/></clipPath>",
        N(a.x0),
        N(a.y0),
        N(a.w()),
        N(a.h())
    );
}

pub(super) fn draw_frame(out: &mut String, a: Area) {
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
pub(super) fn draw_message(out: &mut String, a: Area, text: &str) {
    w!(
        out,
        "<text class=\"no-data\" x=\"{}\" y=\"{}\" text-anchor=\"middle\" font-size=\"14\" fill=\"{C_MUTED}\">{}</text>",
        N(a.mid_x()),
        N(a.mid_y()),
        Esc(text)
    );
}

/// Ends the `<defs>` of a chart with the off-line hatch pattern, then the white page
/// and the title (the reactor chart and the overview open the same way).
pub(super) fn close_defs_and_title(out: &mut String, height: f64, title: &str) {
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
}

#[cfg(test)]
mod tests {
    use crate::plot::model::{Marker, MarkerKind};
    use crate::plot::overview::overview_svg;
    use crate::plot::reactor::reactor_svg;
    use crate::plot::test_support::{T0, by_id, parse, plot_n, texts};
    use crate::units::HOUR_MS;

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
}
