//! The data the charts take: points, baselines, projections, markers, limits, aggregates,
//! off-line spans, one reactor's plot, and the time zone the labels are written in.

use std::fmt;

use crate::units::MINUTE_MS;

/// One evaluation as plotted.
#[derive(Clone, Copy, Debug, PartialEq, Default)]
pub struct PlotPoint {
    /// Epoch milliseconds (UTC).
    pub t_ms: i64,
    /// Approach to equilibrium (K); `None` = bad quality / no figure, drawn as a gap.
    pub approach_k: Option<f64>,
    /// ± half-width of the approach (K), drawn as a shaded band.
    pub uncertainty_k: Option<f64>,
    /// `false` = uncertain quality: still drawn, with a hollow marker.
    pub good: bool,
    /// Key component mole fraction (0..1), measured; values outside -0.001..1.001 are gaps.
    pub key_measured: Option<f64>,
    /// Key component mole fraction (0..1) at equilibrium; as `key_measured` for bad values.
    pub key_equilibrium: Option<f64>,
}

/// A period whose approach is the reference ("baseline"), drawn as a horizontal segment.
#[derive(Clone, Copy, Debug, PartialEq, Default)]
pub struct BaselineSpan {
    pub from_ms: i64,
    pub to_ms: i64,
    pub approach_k: f64,
    /// One standard deviation (K) of the baseline, drawn as a light band when given.
    pub sigma_k: Option<f64>,
}

/// Trend line over the data and its forward projection to the end-of-run limit.
#[derive(Clone, Debug, PartialEq, Default)]
pub struct Projection {
    /// (t_ms, fitted approach K, lower K, upper K), over the data and forward to the limit.
    pub points: Vec<(i64, f64, f64, f64)>,
    pub slope_k_per_day: f64,
    /// When the fit reaches the limit: a vertical line labelled `end of run <date>`.
    pub end_of_run_ms: Option<i64>,
    /// Earliest..latest end of run (interval), drawn as a bar on the limit line.
    pub end_of_run_range_ms: Option<(i64, i64)>,
}

/// Kind of an event marker; each kind has its own colour, dash pattern and shape.
#[derive(Clone, Copy, PartialEq, Eq, Debug)]
pub enum MarkerKind {
    Alert,
    Alarm,
    Cleared,
    Operator,
}

/// An event on the time axis (alert raised, alarm, cleared, operator note). Markers are
/// numbered in time order on the chart and listed with these texts under it.
#[derive(Clone, Debug, PartialEq)]
pub struct Marker {
    pub t_ms: i64,
    pub kind: MarkerKind,
    /// Who: the reactor and alarm or alert, e.g. "alarm approach-high".
    pub source: String,
    /// What happened, e.g. "raised" or "acknowledged by op1".
    pub label: String,
}

/// An operator alarm limit on the approach, drawn as a horizontal line with its id.
#[derive(Clone, Debug, PartialEq)]
pub struct AlarmLimit {
    /// The alarm's id within the reactor, e.g. "approach-high".
    pub id: String,
    pub limit_k: f64,
    /// `true` for a high alarm (raised above the limit), `false` for a low one.
    pub high: bool,
}

/// A steady-state aggregate (mean approach over one aggregate period) as the trend sees it.
#[derive(Clone, Copy, Debug, PartialEq, Default)]
pub struct AggregatePoint {
    /// Middle of the aggregate period, epoch ms.
    pub t_ms: i64,
    pub approach_k: f64,
    /// Whether the current trend was fitted on it (filled marker) or not (hollow).
    pub in_fit: bool,
}

/// A period when the unit was off line (pressure below its off-line limit), shaded.
#[derive(Clone, Copy, Debug, PartialEq, Default)]
pub struct OfflineSpan {
    pub from_ms: i64,
    pub to_ms: i64,
}

/// Everything drawn for one reactor.
#[derive(Clone, Debug, PartialEq, Default)]
pub struct ReactorPlot {
    /// Reactor id, e.g. "lts1".
    pub reactor: String,
    /// Chart title, e.g. "Low-temperature shift converter (lts1)".
    pub title: String,
    /// Key component name, e.g. "CO".
    pub key_component: String,
    /// End-of-run limit on the approach (K): horizontal dashed line, labelled.
    pub limit_k: Option<f64>,
    /// Evaluations, time-ordered (they are sorted again here, so order is not trusted).
    pub points: Vec<PlotPoint>,
    pub baselines: Vec<BaselineSpan>,
    pub projection: Option<Projection>,
    pub markers: Vec<Marker>,
    /// Operator alarm limits on the approach (the reactor's configured alarms).
    pub alarm_limits: Vec<AlarmLimit>,
    /// Off-line periods of the unit.
    pub offline: Vec<OfflineSpan>,
    /// Steady-state aggregates the trend is fitted on.
    pub aggregates: Vec<AggregatePoint>,
    /// Length of one aggregate period (ms), for the legend ("daily mean"); 0 = not known.
    pub aggregate_period_ms: i64,
    /// Basis of the key-component values ("dry" or "wet"), written in the axis title.
    pub key_basis: Option<String>,
}

/// A fixed offset from UTC for the time-axis labels. Fixed offsets only: no daylight-saving
/// rules (a zone that changes its offset in summer is shown at one of its offsets).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub struct TimeZone {
    offset_min: i32,
}

/// A time zone text that is not "UTC" or a fixed offset such as "+01:00".
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct TimeZoneError(pub String);

impl fmt::Display for TimeZoneError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "time zone \"{}\" is not UTC or a fixed offset such as +01:00 or -05:30 \
             (offsets up to ±23:59; no named zones or summer time)",
            self.0
        )
    }
}

impl std::error::Error for TimeZoneError {}

impl TimeZone {
    pub const UTC: TimeZone = TimeZone { offset_min: 0 };

    /// A zone `offset_min` minutes ahead of UTC; `None` beyond ±23:59 (the RFC 3339 range).
    pub fn fixed(offset_min: i32) -> Option<TimeZone> {
        (offset_min.abs() < 24 * 60).then_some(TimeZone { offset_min })
    }

    /// "UTC", "Z", "+01:00", "-0530", "+01", "UTC+01:00" (case-insensitive prefix).
    pub fn parse(text: &str) -> Result<TimeZone, TimeZoneError> {
        let err = || TimeZoneError(text.to_string());
        let t = text.trim();
        if t.eq_ignore_ascii_case("utc") || t.eq_ignore_ascii_case("z") {
            return Ok(TimeZone::UTC);
        }
        let t = match t.get(..3) {
            Some(p) if p.eq_ignore_ascii_case("utc") => &t[3..],
            _ => t,
        };
        let (sign, rest) = match t.as_bytes().first() {
            Some(b'+') => (1, &t[1..]),
            Some(b'-') => (-1, &t[1..]),
            _ => return Err(err()),
        };
        let digits = |s: &str| s.len() == 2 && s.bytes().all(|b| b.is_ascii_digit());
        let (hh, mm) = match rest.split_once(':') {
            Some((h, m)) if digits(h) && digits(m) => (h, m),
            None if rest.len() == 4
                && rest.is_ascii()
                && digits(&rest[..2])
                && digits(&rest[2..]) =>
            {
                (&rest[..2], &rest[2..])
            }
            None if digits(rest) => (rest, "00"),
            _ => return Err(err()),
        };
        let (h, m): (i32, i32) = match (hh.parse(), mm.parse()) {
            (Ok(h), Ok(m)) if h < 24 && m < 60 => (h, m),
            _ => return Err(err()),
        };
        TimeZone::fixed(sign * (h * 60 + m)).ok_or_else(err)
    }

    pub fn offset_minutes(&self) -> i32 {
        self.offset_min
    }

    pub(super) fn offset_ms(&self) -> i64 {
        i64::from(self.offset_min) * MINUTE_MS
    }

    /// "UTC" or "UTC+01:00".
    pub fn name(&self) -> String {
        if self.offset_min == 0 {
            return "UTC".to_string();
        }
        let sign = if self.offset_min < 0 { '-' } else { '+' };
        let a = self.offset_min.unsigned_abs();
        format!("UTC{sign}{:02}:{:02}", a / 60, a % 60)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn time_zone_parsing() {
        for (text, minutes) in [
            ("UTC", 0),
            ("z", 0),
            ("+01:00", 60),
            ("-05:30", -330),
            ("+0545", 345),
            ("UTC+02", 120),
            ("utc-03:00", -180),
            ("+23:59", 1439),
        ] {
            assert_eq!(
                TimeZone::parse(text).map(|z| z.offset_minutes()),
                Ok(minutes),
                "{text}"
            );
        }
        for bad in [
            "",
            "CET",
            "+1",
            "+24:00",
            "+01:60",
            "01:00",
            "+01:00:00",
            "Europe/Berlin",
        ] {
            assert!(TimeZone::parse(bad).is_err(), "{bad}");
        }
        assert_eq!(
            TimeZone::parse("+01:00").map(|z| z.name()),
            Ok("UTC+01:00".to_string())
        );
        assert_eq!(
            TimeZone::parse("-05:30").map(|z| z.name()),
            Ok("UTC-05:30".to_string())
        );
        assert_eq!(TimeZone::UTC.name(), "UTC");
    }
}
