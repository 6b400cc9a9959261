//! Preparing a reactor's data for drawing: points sorted by time, the projection clipped to
//! the chart, and the time domain (data, projection and end of run, a wild forecast capped).

use super::model::{PlotPoint, Projection, ReactorPlot};
use super::svg::{sane_t, usable};
use crate::units::DAY_MS;

/// One reactor's data ready to draw: the plot, its points in time order, its whole
/// projection and time domain, and the names the document prints.
pub(super) struct Prepared<'a> {
    pub(super) plot: &'a ReactorPlot,
    pub(super) points: Vec<&'a PlotPoint>,
    /// The projection before it is clipped to the chart.
    pub(super) projection: Vec<ProjPt>,
    /// `None` when nothing has a plottable time.
    pub(super) domain: Option<Domain>,
    /// The key component's name ("key component" when the plot has none).
    pub(super) key: &'a str,
    /// The plot title, else the reactor.
    pub(super) title: &'a str,
    /// The key component's basis ("dry", "wet"), when given.
    pub(super) basis: Option<&'a str>,
}

impl<'a> Prepared<'a> {
    pub(super) fn new(plot: &'a ReactorPlot) -> Prepared<'a> {
        let points = sorted_points(&plot.points);
        let projection = plot
            .projection
            .as_ref()
            .map(projection_points)
            .unwrap_or_default();
        let domain = reactor_domain(plot, &points, &projection);
        let key = if plot.key_component.trim().is_empty() {
            "key component"
        } else {
            plot.key_component.as_str()
        };
        let title = if plot.title.trim().is_empty() {
            plot.reactor.as_str()
        } else {
            plot.title.as_str()
        };
        let basis = plot
            .key_basis
            .as_deref()
            .map(str::trim)
            .filter(|b| !b.is_empty());
        Prepared {
            plot,
            points,
            projection,
            domain,
            key,
            title,
            basis,
        }
    }
}

/// The projection may extend the time axis by at most the data span divided by this.
const PROJECTION_DIVISOR: i64 = 2;

/// Points with a plottable time, sorted by time (stable).
pub(super) fn sorted_points(points: &[PlotPoint]) -> Vec<&PlotPoint> {
    let mut v: Vec<&PlotPoint> = points.iter().filter(|p| sane_t(p.t_ms)).collect();
    v.sort_by_key(|p| p.t_ms);
    v
}

/// A projection point with every value usable; `lo ≤ hi`.
#[derive(Clone, Copy, Debug)]
pub(super) struct ProjPt {
    pub(super) t: i64,
    pub(super) fit: f64,
    pub(super) lo: f64,
    pub(super) hi: f64,
}

fn projection_points(pr: &Projection) -> Vec<ProjPt> {
    let mut v: Vec<ProjPt> = pr
        .points
        .iter()
        .filter(|&&(t, f, a, b)| sane_t(t) && usable(f) && usable(a) && usable(b))
        .map(|&(t, fit, a, b)| ProjPt {
            t,
            fit,
            lo: a.min(b),
            hi: a.max(b),
        })
        .collect();
    v.sort_by_key(|p| p.t);
    v
}

/// The part of a projection inside [t0, t1], with points interpolated on the bounds.
pub(super) fn clip_projection(v: &[ProjPt], t0: i64, t1: i64) -> Vec<ProjPt> {
    let lerp = |p: ProjPt, q: ProjPt, t: i64| {
        let f = (t as f64 - p.t as f64) / (q.t as f64 - p.t as f64);
        ProjPt {
            t,
            fit: p.fit + f * (q.fit - p.fit),
            lo: p.lo + f * (q.lo - p.lo),
            hi: p.hi + f * (q.hi - p.hi),
        }
    };
    let mut out = Vec::new();
    for (i, &p) in v.iter().enumerate() {
        if i > 0 {
            let q = v[i - 1];
            for bound in [t0, t1] {
                if q.t < bound && p.t > bound {
                    out.push(lerp(q, p, bound));
                }
            }
        }
        if (t0..=t1).contains(&p.t) {
            out.push(p);
        }
    }
    out
}

/// The time range of a reactor chart, and the end of run when the range could not reach it.
pub(super) struct Domain {
    pub(super) t0: i64,
    pub(super) t1: i64,
    /// Last data time (the trend becomes a projection after it).
    pub(super) data_end: i64,
}

fn reactor_domain(plot: &ReactorPlot, pts: &[&PlotPoint], proj: &[ProjPt]) -> Option<Domain> {
    let (d0, d1) = match (pts.first(), pts.last()) {
        (Some(a), Some(b)) => (a.t_ms, b.t_ms),
        _ => {
            // No evaluations: show whatever else has a time, or nothing.
            let times = plot
                .markers
                .iter()
                .map(|m| m.t_ms)
                .chain(plot.baselines.iter().flat_map(|b| [b.from_ms, b.to_ms]))
                .chain(proj.iter().map(|q| q.t))
                .filter(|&t| sane_t(t));
            let (mut lo, mut hi) = (None::<i64>, None::<i64>);
            for t in times {
                lo = Some(lo.map_or(t, |v| v.min(t)));
                hi = Some(hi.map_or(t, |v| v.max(t)));
            }
            let (lo, hi) = (lo?, hi?);
            return Some(Domain {
                t0: lo,
                t1: hi,
                data_end: hi,
            });
        }
    };
    let mut want_end = d1;
    if let Some(pr) = &plot.projection {
        if let Some(e) = pr.end_of_run_ms.filter(|&e| sane_t(e)) {
            want_end = want_end.max(e);
        }
        if let Some(last) = proj.last() {
            want_end = want_end.max(last.t);
        }
    }
    let cap_end = d1 + (d1 - d0).max(2 * DAY_MS) / PROJECTION_DIVISOR;
    let mut t1 = want_end.min(cap_end).max(d1);
    if t1 > d1 {
        // Room after the end of run so that its line does not sit on the frame.
        t1 += (t1 - d0) / 50;
    }
    Some(Domain {
        t0: d0,
        t1,
        data_end: d1,
    })
}

#[cfg(test)]
mod tests {
    use crate::plot::model::Projection;
    use crate::plot::reactor::reactor_svg;
    use crate::plot::test_support::{
        T0, by_id, has_class, parse, path_d, plot_n, subpaths, texts, x_tick_labels,
    };
    use crate::units::{DAY_MS, HOUR_MS};

    #[test]
    fn time_axis_reaches_the_end_of_run() {
        // 30 days of hourly data, projected to reach the limit 15 days later (invented).
        let mut p = plot_n(30 * 24, HOUR_MS);
        let end = T0 + 30 * DAY_MS;
        let eor = end + 15 * DAY_MS;
        p.projection = Some(Projection {
            points: vec![
                (T0, 8.0, 7.5, 8.5),
                (end, 14.0, 13.0, 15.0),
                (eor, 25.0, 21.0, 29.0),
            ],
            slope_k_per_day: 0.4,
            end_of_run_ms: Some(eor),
            end_of_run_range_ms: Some((eor - 3 * DAY_MS, eor + 40 * DAY_MS)),
        });
        let svg = reactor_svg(&p);
        let doc = parse(&svg);
        let e = by_id(&doc, "end-of-run");
        let line = path_d(e, "line").unwrap_or_default();
        assert_eq!(subpaths(&line), 1);
        // 2026-01-01 + 45 days = 2026-02-15.
        assert!(texts(&doc).iter().any(|s| s == "end of run 2026-02-15"));
        assert!(
            e.descendants()
                .any(|n| has_class(&n, "range") && n.children().any(|c| c.has_tag_name("title")))
        );
        assert!(path_d(by_id(&doc, "trend"), "line").is_some());
        let proj = by_id(&doc, "projection");
        assert!(path_d(proj, "band").is_some() && path_d(proj, "line").is_some());
        assert!(texts(&doc).iter().any(|s| s == "trend +0.4 K/day"));
        let ticks = x_tick_labels(&doc);
        assert!(ticks.iter().any(|t| t.as_str() > "2026-02-01"), "{ticks:?}");
    }

    #[test]
    fn a_wild_forecast_is_capped_at_half_a_data_span() {
        // 10 days of data; a forecast 400 days out (invented).
        let mut p = plot_n(10 * 24, HOUR_MS);
        let end = T0 + 10 * DAY_MS;
        p.projection = Some(Projection {
            points: vec![(T0, 8.0, 7.5, 8.5), (end + 400 * DAY_MS, 25.0, 0.0, 80.0)],
            slope_k_per_day: 0.04,
            end_of_run_ms: Some(end + 400 * DAY_MS),
            end_of_run_range_ms: None,
        });
        let svg = reactor_svg(&p);
        let doc = parse(&svg);
        let t = texts(&doc);
        // 2026-01-11 + 400 days = 2027-02-15.
        assert!(
            t.iter()
                .any(|s| s == "end of run beyond chart: 2027-02-15 →"),
            "{t:?}"
        );
        // Axis ends at data end + 10 days / 2 = 2026-01-16.
        let ticks = x_tick_labels(&doc);
        assert!(!ticks.is_empty());
        assert!(
            ticks.iter().all(|t| t.as_str() <= "2026-01-16"),
            "{ticks:?}"
        );
    }
}
