//! The key-component chart (bottom of the per-reactor document): measured and at
//! equilibrium, mol% or ppm, log scale when the values span more than two decades.

use std::fmt::Write as _;

use super::axes::{Axis, TimeAxis, YScale, draw_time_grid, draw_y_axis, linear_axis, log_axis};
use super::model::PlotPoint;
use super::prepare::Prepared;
use super::series::{GroupAttrs, Px, drawable, envelope, line_path, offline_group};
use super::style::{C_EQUILIBRIUM, C_MEASURED, DASH_EQUILIBRIUM};
use super::svg::{Area, N, dash_attr, draw_frame, draw_message, usable_fraction};

/// Unit and axis of the key-component chart: ppm when the largest value is below 0.1 mol%,
/// else mol%; log10 when the positive values span more than two decades.
pub(super) fn key_axis(values: &[f64]) -> Option<(f64, &'static str, Axis)> {
    let vals: Vec<f64> = values
        .iter()
        .copied()
        .filter(|v| usable_fraction(*v))
        .collect();
    let max_abs = vals.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    if vals.is_empty() {
        return None;
    }
    let (scale, unit) = if max_abs < 1e-3 {
        (1e6, "ppm")
    } else {
        (100.0, "mol %")
    };
    let pos = vals.iter().filter(|v| **v > 0.0);
    let (pmin, pmax) = pos.fold((f64::INFINITY, 0.0f64), |(a, b), v| (a.min(*v), b.max(*v)));
    if pmax > 0.0 && pmax / pmin > 100.0 {
        return Some((scale, unit, log_axis(pmin * scale, pmax * scale)));
    }
    let (lo, hi) = vals
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
            (a.min(*v), b.max(*v))
        });
    Some((scale, unit, linear_axis(lo * scale, hi * scale, 5)))
}

/// Every key-component value of the points (measured and at equilibrium).
pub(super) fn key_values(pts: &[&PlotPoint]) -> Vec<f64> {
    pts.iter()
        .flat_map(|q| [q.key_measured, q.key_equilibrium])
        .flatten()
        .collect()
}

/// The key-component axis title: "CO, mol % dry basis", "CO, ppm, log scale".
fn key_label(key: &str, unit: &str, basis: Option<&str>, log: bool) -> String {
    let mut s = format!("{key}, {unit}");
    if let Some(b) = basis {
        s.push_str(&format!(" {b} basis"));
    }
    if log {
        s.push_str(", log scale");
    }
    s
}

pub(super) fn key_chart(out: &mut String, data: &Prepared, ta: &TimeAxis, area: Area) {
    let (plot, pts, key, basis) = (data.plot, &data.points[..], data.key, data.basis);
    let ts = ta.scale;
    let axis = key_axis(&key_values(pts));
    let group = GroupAttrs {
        attr: "id=\"key-offline\"",
        clip: "clip-key",
    };
    offline_group(out, &group, &plot.offline, &ts, area);
    draw_time_grid(out, area, ta, true);
    let mut drawn = 0usize;
    match axis {
        Some((scale, unit, axis)) => {
            let label = key_label(key, unit, basis, axis.log);
            let ys = YScale {
                axis,
                top: area.y0,
                bottom: area.y1,
            };
            draw_y_axis(out, area, &ys, &label);
            type Pick = fn(&PlotPoint) -> Option<f64>;
            let series: [(&str, Pick, &str, &str); 2] = [
                (
                    "key-equilibrium",
                    |q| q.key_equilibrium,
                    C_EQUILIBRIUM,
                    DASH_EQUILIBRIUM,
                ),
                ("key-measured", |q| q.key_measured, C_MEASURED, ""),
            ];
            for (id, pick, colour, dash) in series {
                let samples: Vec<Px> = pts
                    .iter()
                    .map(|q| Px {
                        x: ts.x(q.t_ms),
                        y: pick(q)
                            .filter(|v| usable_fraction(*v))
                            .and_then(|v| ys.y(v * scale)),
                        band: None,
                        env: None,
                        good: true,
                    })
                    .collect();
                let (series, decimated) = drawable(samples, area);
                w!(out, "<g id=\"{id}\" clip-path=\"url(#clip-key)\">");
                if decimated {
                    envelope(out, &series, colour, "0.15");
                }
                let (line, isolated) = line_path(&series);
                if !line.is_empty() {
                    w!(
                        out,
                        "<path class=\"line\" d=\"{line}\" fill=\"none\" stroke=\"{colour}\" stroke-width=\"1.6\" \
                         stroke-linejoin=\"round\"{}/>",
                        dash_attr(dash)
                    );
                }
                for (x, y) in isolated {
                    w!(
                        out,
                        "<circle class=\"point\" cx=\"{}\" cy=\"{}\" r=\"2.4\" fill=\"{colour}\"/>",
                        N(x),
                        N(y)
                    );
                }
                drawn += series.iter().filter(|q| q.y.is_some()).count();
                out.push_str("</g>");
            }
        }
        None => {
            out.push_str("<g id=\"key-equilibrium\"/><g id=\"key-measured\"/>");
        }
    }
    draw_frame(out, area);
    if drawn == 0 {
        draw_message(out, area, &format!("no data: no valid {key} value"));
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::plot::reactor::reactor_svg;
    use crate::plot::test_support::{by_id, parse, path_d, plot_n, subpaths, texts};
    use crate::units::HOUR_MS;

    #[test]
    fn methanator_key_component_in_ppm_on_a_log_axis() {
        // Methanator-like outlet (invented test data): CO measured 5 ppm, 1e-4 ppm at equilibrium.
        let mut p = plot_n(30, HOUR_MS);
        p.title = "Methanator (meth1)".into();
        for q in &mut p.points {
            q.key_measured = Some(5e-6);
            q.key_equilibrium = Some(1e-10);
        }
        // Zero cannot be drawn on a log axis: a gap.
        p.points[12].key_measured = Some(0.0);
        let svg = reactor_svg(&p);
        let doc = parse(&svg);
        let t = texts(&doc);
        assert!(t.iter().any(|s| s == "CO, ppm, log scale"), "{t:?}");
        // Decade ticks from 1e-4 ppm to 10 ppm.
        for tick in ["1e-4", "0.001", "0.01", "0.1", "1", "10"] {
            assert!(t.iter().any(|s| s == tick), "tick {tick}");
        }
        let meas = path_d(by_id(&doc, "key-measured"), "line").unwrap_or_default();
        assert_eq!(subpaths(&meas), 2, "{meas}");
        let eq = path_d(by_id(&doc, "key-equilibrium"), "line").unwrap_or_default();
        assert_eq!(subpaths(&eq), 1);
    }

    #[test]
    fn key_unit_and_scale_choice() {
        // Values invented to sit either side of the 0.1 mol% and two-decade thresholds.
        let a = key_axis(&[0.003, 0.0025]);
        assert!(matches!(a, Some((s, "mol %", ref ax)) if s == 100.0 && !ax.log));
        let b = key_axis(&[500e-6, 300e-6]);
        assert!(matches!(b, Some((s, "ppm", ref ax)) if s == 1e6 && !ax.log));
        let c = key_axis(&[0.05, 0.0001]);
        assert!(matches!(c, Some((_, "mol %", ref ax)) if ax.log));
        assert!(key_axis(&[f64::NAN, f64::INFINITY]).is_none());
        // A mole fraction of -1 or 2 is not a reading: not plotted, does not set the axis.
        assert!(key_axis(&[-1.0, 2.0]).is_none());
        let d = key_axis(&[-1.0, 0.003, 0.0025]);
        assert!(matches!(d, Some((_, "mol %", ref ax)) if ax.lo >= 0.0));
        assert!(key_axis(&[]).is_none());
    }

    #[test]
    fn key_chart_names_its_basis() {
        let mut p = plot_n(10, HOUR_MS);
        p.key_basis = Some("dry".into());
        let doc_s = reactor_svg(&p);
        let doc = parse(&doc_s);
        let t = texts(&doc);
        assert!(t.iter().any(|s| s == "CO, mol % dry basis"), "{t:?}");
        assert!(
            t.iter()
                .any(|s| s == "CO (dry basis): measured and at equilibrium")
        );
    }
}
