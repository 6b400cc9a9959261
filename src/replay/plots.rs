//! Plots of a run: a trace per reactor turned into the charts' model, and the one SVG
//! writer the replay and the demo share.

use crate::composition::Basis;
use crate::config::{ReactorSettings, Settings};
use crate::monitor::alarm::{Direction, EventKind};
use crate::monitor::watch::{Class, Figure, Forecast};
use crate::pipeline::Trace;
use crate::pipeline::expand;
use crate::plot::{
    AggregatePoint, AlarmLimit, BaselineSpan, Marker, MarkerKind, OfflineSpan, PlotPoint,
    Projection, ReactorPlot,
};
use crate::units::DAY_MS;

/// A wet mole fraction on a dry basis, given the wet water fraction of the same gas:
/// y_dry = y_wet / (1 − y_H2O) (docs/domain.md §5, dry basis = the gas with its water knocked out).
/// `None` without a usable water fraction: a value on the wrong basis is not plotted.
pub(super) fn dry(wet: Option<f64>, water: Option<f64>) -> Option<f64> {
    match (wet, water) {
        (Some(y), Some(w)) if (0.0..1.0).contains(&w) => Some(y / (1.0 - w)),
        _ => None,
    }
}

/// The plot of one reactor from its replay trace. The key component is plotted on the
/// analyser's basis: dry values are worked out from the wet ones and the water of the
/// same gas (measured gas: the water rebuilt from the steam ratio; equilibrium: its own).
pub fn reactor_plot(s: &Settings, r: usize, t: &Trace) -> ReactorPlot {
    let rs = &s.reactors[r];
    let on_dry = rs.spec.composition.basis == Basis::Dry;
    let points = plot_points(t, on_dry);
    let baselines = baseline_spans(t);
    let markers = markers(t);
    let alarm_limits = alarm_limits(rs);
    let offline = offline_spans(t);
    let aggregates = aggregate_points(t);
    let projection = projection(t);
    ReactorPlot {
        reactor: rs.spec.id.clone(),
        title: format!("{} ({})", rs.spec.name, rs.spec.id),
        key_component: s.species.get(rs.spec.key_component).name.clone(),
        limit_k: rs.spec.watch.drift.end_of_run_limit_k,
        points,
        baselines,
        projection,
        markers,
        alarm_limits,
        offline,
        aggregates,
        aggregate_period_ms: rs.spec.watch.drift.aggregate_ms,
        key_basis: Some(rs.spec.composition.basis.as_str().to_string()),
    }
}

/// The evaluations as chart points; the key component on the analyser's basis, and a
/// gap where the analysis was bad.
fn plot_points(t: &Trace, on_dry: bool) -> Vec<PlotPoint> {
    t.points
        .iter()
        .map(|p| {
            let (mut km, mut ke) = (expand(p.key_measured), expand(p.key_equilibrium));
            let approach = expand(p.approach_k);
            if p.bad {
                // A bad analysis (e.g. calibration gas) is a gap here too, as on the approach.
                (km, ke) = (None, None);
            }
            if on_dry {
                km = dry(km, expand(p.water_measured));
                ke = dry(ke, expand(p.water_equilibrium));
            }
            PlotPoint {
                t_ms: p.t_ms,
                approach_k: approach,
                uncertainty_k: expand(p.uncertainty_k),
                good: p.good,
                key_measured: km,
                key_equilibrium: ke,
            }
        })
        .collect()
}

/// The baselines in force, span by span.
fn baseline_spans(t: &Trace) -> Vec<BaselineSpan> {
    t.baselines
        .iter()
        .map(|b| BaselineSpan {
            from_ms: b.from_ms,
            to_ms: b.to_ms,
            approach_k: b.approach_k,
            sigma_k: Some(b.sigma_k),
        })
        .collect()
}

/// Alert and alarm events and operator actions as markers (other events are left out).
fn markers(t: &Trace) -> Vec<Marker> {
    t.events
        .iter()
        .filter_map(|e| {
            let kind = match (&e.kind, e.class) {
                (EventKind::Raised | EventKind::Realarmed, Class::Alarm) => MarkerKind::Alarm,
                (EventKind::Raised | EventKind::Realarmed, Class::Alert) => MarkerKind::Alert,
                (EventKind::Cleared, _) => MarkerKind::Cleared,
                (
                    EventKind::Acknowledged { .. }
                    | EventKind::Shelved { .. }
                    | EventKind::OutOfService { .. }
                    | EventKind::ReturnedToService { .. },
                    _,
                ) => MarkerKind::Operator,
                _ => return None,
            };
            let what = crate::wire::watch::event_name(&e.kind);
            let by = match &e.kind {
                EventKind::Acknowledged { by }
                | EventKind::Shelved { by, .. }
                | EventKind::OutOfService { by, .. }
                | EventKind::ReturnedToService { by } => format!(" by {by}"),
                _ => String::new(),
            };
            Some(Marker {
                t_ms: e.t_ms,
                kind,
                source: format!("{} {}", e.class.as_str(), e.alarm),
                label: format!("{what}{by}"),
            })
        })
        .collect()
}

/// The approach alarms' limits, in K, to draw on the approach chart.
fn alarm_limits(rs: &ReactorSettings) -> Vec<AlarmLimit> {
    rs.spec
        .watch
        .alarms
        .iter()
        .filter(|a| a.figure == Figure::Approach && a.scale > 0.0)
        .map(|a| AlarmLimit {
            id: a.config.id.clone(),
            limit_k: a.config.limit / a.scale,
            high: a.config.direction == Direction::High,
        })
        .collect()
}

/// Off-line spans; one still open ends with the data.
fn offline_spans(t: &Trace) -> Vec<OfflineSpan> {
    let data_end = t.points.last().map(|p| p.t_ms);
    t.offline
        .iter()
        .filter_map(|&(from, to)| {
            let to = to.or(data_end.map(|e| e.max(from)))?;
            Some(OfflineSpan {
                from_ms: from,
                to_ms: to,
            })
        })
        .collect()
}

/// The daily aggregates, marked where the current trend was fitted on them: the
/// aggregates of the last run between its first and last fitted points (a trend window
/// may leave older ones out).
fn aggregate_points(t: &Trace) -> Vec<AggregatePoint> {
    let fitted = t.last_drift.as_ref().and_then(|d| d.trend);
    t.aggregates
        .iter()
        .map(|&(t_ms, k)| AggregatePoint {
            t_ms,
            approach_k: k,
            in_fit: fitted.is_some_and(|f| {
                t_ms >= f.origin_ms && t_ms >= f.first_ms - 1 && t_ms <= f.last_ms + 1
            }),
        })
        .collect()
}

/// The trend line with its band, up to the end-of-run forecast or at most half the
/// data span ahead.
fn projection(t: &Trace) -> Option<Projection> {
    let d = t.last_drift.as_ref()?;
    let tr = d.trend?;
    let day = DAY_MS as f64;
    let (end, range) = match d.forecast {
        Forecast::At {
            at_ms,
            earliest_ms,
            latest_ms,
        } => (Some(at_ms), Some((earliest_ms, latest_ms.unwrap_or(at_ms)))),
        _ => (None, None),
    };
    let span = (tr.last_ms - tr.first_ms).max(1);
    // At most half the data span ahead: a far-off forecast must not squash the data
    // (the chart names the date when it is beyond).
    let data_span = t
        .points
        .first()
        .zip(t.points.last())
        .map_or(span, |(a, b)| (b.t_ms - a.t_ms).max(span));
    let to = end
        .unwrap_or(tr.last_ms + data_span / 4)
        .min(tr.last_ms + data_span / 2);
    let steps = 60;
    let pts = (0..=steps)
        .map(|i| {
            let tm = tr.first_ms + (to - tr.first_ms) * i / steps;
            let x = (tm - tr.origin_ms) as f64 / day;
            let y = tr.intercept_k + tr.slope_k_per_day * x;
            let b = tr.fit.band(x);
            (tm, y, y - b, y + b)
        })
        .collect();
    Some(Projection {
        points: pts,
        slope_k_per_day: tr.slope_k_per_day,
        end_of_run_ms: end,
        end_of_run_range_ms: range,
    })
}

/// Writes `<reactor>.svg` per reactor and `overview.svg` into `dir` for a replay's
/// traces, times on the axes in `tz`; returns the paths.
pub fn write_plots(
    s: &Settings,
    traces: &[Trace],
    dir: &std::path::Path,
    title: &str,
    tz: crate::plot::TimeZone,
) -> std::io::Result<Vec<std::path::PathBuf>> {
    let plots: Vec<crate::plot::ReactorPlot> = traces
        .iter()
        .enumerate()
        .map(|(r, t)| reactor_plot(s, r, t))
        .collect();
    write_svgs(dir, &plots, title, tz)
}

/// The one plot writer (replay and demo): `<reactor>.svg` per reactor and
/// `overview.svg` into `dir` (created if needed), times on the axes in `tz`; returns
/// the paths in that order.
pub fn write_svgs(
    dir: &std::path::Path,
    plots: &[crate::plot::ReactorPlot],
    title: &str,
    tz: crate::plot::TimeZone,
) -> std::io::Result<Vec<std::path::PathBuf>> {
    std::fs::create_dir_all(dir)?;
    let mut paths = Vec::with_capacity(plots.len() + 1);
    for p in plots {
        let path = dir.join(format!("{}.svg", p.reactor));
        std::fs::write(&path, crate::plot::reactor_svg_tz(p, tz))?;
        paths.push(path);
    }
    let path = dir.join("overview.svg");
    std::fs::write(&path, crate::plot::overview_svg_tz(plots, title, tz))?;
    paths.push(path);
    Ok(paths)
}
