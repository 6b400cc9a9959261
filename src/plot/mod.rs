//! SVG charts of a reactor's approach to equilibrium, rendered as `String`s.
//!
//! [`reactor_svg`] draws one reactor as two stacked charts sharing a time axis: the approach
//! to equilibrium (K) with its uncertainty band, baselines, trend and projection to the
//! end-of-run limit, and alert/alarm/cleared/operator markers; below it the key component,
//! measured and at equilibrium (mol% or ppm, log scale when the values span more than two
//! decades). [`overview_svg`] draws small multiples, one row per reactor, approach only.
//!
//! What this module must not do: no file or network I/O, no clock, no async runtime, no
//! crate outside `std` (it builds with `--no-default-features`). Callers pass every time in
//! (epoch milliseconds, UTC) and write the returned text wherever they like. Bad data never
//! panics: NaN/inf values, empty series, single points, equal values, zero-length or absurd
//! time ranges all give a valid SVG, with "no data" text where nothing can be drawn.
//!
//! Large series (a year of 5-minute data is ~105,000 points) are decimated per pixel column:
//! a min–max envelope plus the mean line, with a column that has no valid point breaking the
//! line. Coordinates carry one decimal place.
//!
//! Stable structure for tests and users: `<g id="approach">` (`path.line`, and in decimated
//! mode `path.envelope`), `uncertainty`, `uncertain-quality`, `gaps`, `offline` and
//! `key-offline` (`rect.offline`), `baseline`, `trend`, `projection`, `limit`, `alarm-limits`
//! (`g.alarm-limit` with `data-id`, `data-limit-k`), `aggregates` (`rect.aggregate`, class
//! `in-fit` when the trend was fitted on it), `end-of-run`, `markers` (children
//! `g.marker.alert|alarm|cleared|operator` with `data-n`, each with a `<title>`),
//! `marker-numbers` (`g.number-box`: the numbers above the chart, stacked in lanes, a run of
//! close markers sharing one box "3–5"), `events` (`g.event-row` with `data-n`: number, time,
//! who, what), `key-measured`, `key-equilibrium`, `legend`. Times are labelled in UTC or a
//! fixed offset ([`TimeZone`]; no summer-time rules), the zone written in the axis title. The root carries a
//! `<title>` with the plot title and a `<desc>` saying the chart is advisory, not a safety
//! function. Meaning is never carried by colour alone: series also differ in dash pattern and
//! markers in shape.
//!
//! The folder, one file per seam: `model` (the data the charts take, re-exported here),
//! `style` (layout, colours, dashes), `svg` (escaping, numbers, areas, frames), `axes` (value
//! and time axes, ticks, the grid), `series` (decimation, lines, bands, gaps), `markers`
//! (shapes, numbers, the event list), `legend`, `prepare` (sorting, projection, time domain),
//! `approach` and `key` (the two charts of a reactor), `reactor` and `overview` (the two
//! documents), `daily` (a small chart of one value per day, for the period report);
//! `test_support` holds the tests' shared helpers. Within the crate these files
//! may import only `crate::units`, `crate::timefmt` and each other (`tests/architecture.rs`),
//! and never a file, stream, network or clock API (`pure_and_deterministic` below).
//!
//! # References
//! - H. Hinnant, "chrono-Compatible Low-Level Date Algorithms" (civil from days), used through
//!   [`crate::timefmt`] for the UTC tick labels.

/// Appends formatted text to a `String` (writing to a `String` cannot fail).
macro_rules! w {
    ($out:expr, $($arg:tt)*) => {{
        let _ = write!($out, $($arg)*);
    }};
}

mod approach;
mod axes;
mod daily;
mod key;
mod legend;
mod markers;
mod model;
mod overview;
mod prepare;
mod reactor;
mod series;
mod style;
mod svg;

pub use daily::{DailyChart, DailyLimit, DailySeries, daily_svg};
pub use model::{
    AggregatePoint, AlarmLimit, BaselineSpan, Marker, MarkerKind, OfflineSpan, PlotPoint,
    Projection, ReactorPlot, TimeZone, TimeZoneError,
};
pub use overview::{overview_svg, overview_svg_tz};
pub use reactor::{reactor_svg, reactor_svg_tz};

#[cfg(test)]
mod test_support;

#[cfg(test)]
mod tests {
    use super::*;
    use crate::plot::test_support::{T0, plot_n, year_of_data};
    use crate::units::{DAY_MS, HOUR_MS, MINUTE_MS};

    #[test]
    fn pure_and_deterministic() {
        // The module (tests excluded) names no file, network, clock or runtime API.
        let sources = [
            ("mod.rs", include_str!("mod.rs")),
            ("approach.rs", include_str!("approach.rs")),
            ("axes.rs", include_str!("axes.rs")),
            ("daily.rs", include_str!("daily.rs")),
            ("key.rs", include_str!("key.rs")),
            ("legend.rs", include_str!("legend.rs")),
            ("markers.rs", include_str!("markers.rs")),
            ("model.rs", include_str!("model.rs")),
            ("overview.rs", include_str!("overview.rs")),
            ("prepare.rs", include_str!("prepare.rs")),
            ("reactor.rs", include_str!("reactor.rs")),
            ("series.rs", include_str!("series.rs")),
            ("style.rs", include_str!("style.rs")),
            ("svg.rs", include_str!("svg.rs")),
        ];
        for (file, src) in sources {
            let code = src.split("#[cfg(test)]").next().unwrap_or_default();
            for needle in [
                ["std", "::fs"].concat(),
                ["std", "::net"].concat(),
                ["std", "::io"].concat(),
                ["std", "::env"].concat(),
                ["File", "::"].concat(),
                ["System", "Time"].concat(),
                ["Instant", "::now"].concat(),
                ["tok", "io"].concat(),
                ["print", "ln!"].concat(),
            ] {
                assert!(!code.contains(&needle), "plot/{file} uses {needle}");
            }
        }
        let p = year_of_data();
        assert_eq!(reactor_svg(&p), reactor_svg(&p));
        let all = [p.clone(), plot_n(3, HOUR_MS)];
        assert_eq!(overview_svg(&all, "x"), overview_svg(&all, "x"));
    }

    /// Writes samples for a person to look at: `cargo test --lib plot -- --ignored`.
    #[test]
    #[ignore]
    fn write_samples() {
        let mut p = plot_n(30 * 24, HOUR_MS);
        for i in 300..330 {
            p.points[i].approach_k = None;
        }
        for i in (400..460).step_by(3) {
            p.points[i].good = false;
        }
        let end = T0 + 30 * DAY_MS;
        let eor = end + 20 * DAY_MS;
        p.projection = Some(Projection {
            points: vec![
                (T0, 8.0, 7.6, 8.4),
                (end, 14.0, 13.4, 14.6),
                (eor, 25.0, 21.0, 29.0),
            ],
            slope_k_per_day: 0.55,
            end_of_run_ms: Some(eor),
            end_of_run_range_ms: Some((eor - 4 * DAY_MS, eor + 9 * DAY_MS)),
        });
        p.baselines.push(BaselineSpan {
            from_ms: T0,
            to_ms: T0 + 7 * DAY_MS,
            approach_k: 8.3,
            sigma_k: Some(0.7),
        });
        p.markers = vec![
            Marker {
                t_ms: T0 + 18 * DAY_MS,
                kind: MarkerKind::Alert,
                source: "alarm test".into(),
                label: "approach rising faster than baseline".into(),
            },
            Marker {
                t_ms: T0 + 24 * DAY_MS,
                kind: MarkerKind::Alarm,
                source: "alarm test".into(),
                label: "approach 3 sigma above baseline".into(),
            },
            Marker {
                t_ms: T0 + 26 * DAY_MS,
                kind: MarkerKind::Cleared,
                source: "alarm test".into(),
                label: "alarm cleared".into(),
            },
            Marker {
                t_ms: T0 + 12 * DAY_MS,
                kind: MarkerKind::Operator,
                source: "alarm test".into(),
                label: "analyser recalibrated".into(),
            },
        ];
        // Close events, alarm limits, an off-line period and daily means (invented).
        for i in 0..6 {
            p.markers.push(Marker {
                t_ms: T0 + 24 * DAY_MS + (i + 1) * 40 * MINUTE_MS,
                kind: MarkerKind::ALL[i as usize % 4],
                source: "alarm approach-high".into(),
                label: "acknowledged by op1".into(),
            });
        }
        p.alarm_limits = vec![AlarmLimit {
            id: "approach-high".into(),
            limit_k: 18.0,
            high: true,
        }];
        p.offline = vec![OfflineSpan {
            from_ms: T0 + 12 * DAY_MS + 12 * HOUR_MS,
            to_ms: T0 + 13 * DAY_MS + 18 * HOUR_MS,
        }];
        p.aggregates = (0..29)
            .map(|d| AggregatePoint {
                t_ms: T0 + d * DAY_MS + 12 * HOUR_MS,
                approach_k: 8.0 + 0.2 * d as f64,
                in_fit: d >= 7,
            })
            .collect();
        p.aggregate_period_ms = DAY_MS;
        p.key_basis = Some("dry".into());
        let mut m = plot_n(30 * 24, HOUR_MS);
        m.title = "Methanator (meth1)".into();
        m.reactor = "meth1".into();
        for (i, q) in m.points.iter_mut().enumerate() {
            q.key_measured = Some(4e-6 + 2e-6 * (i as f64 * 0.05).sin());
            q.key_equilibrium = Some(1e-10 * (1.0 + 0.3 * (i as f64 * 0.02).cos()));
        }
        let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("target");
        let write = |name: &str, s: &str| {
            if let Err(e) = std::fs::write(dir.join(name), s) {
                panic!("writing {name}: {e}");
            }
        };
        write("plot-sample.svg", &reactor_svg(&p));
        write("plot-sample-methanator.svg", &reactor_svg(&m));
        write("plot-sample-year.svg", &reactor_svg(&year_of_data()));
        write(
            "plot-sample-overview.svg",
            &overview_svg(&[p, m, year_of_data()], "Plant overview"),
        );
    }
}
