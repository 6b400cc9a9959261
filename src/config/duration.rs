//! Durations as written in the configuration (`90s`, `5 min`, `2h`, `1d`) and back.

use std::time::Duration;

use thiserror::Error;

use crate::config::summary::show_number;
use crate::units::split_quantity;

/// Problems with a duration such as `"15 s"`.
#[derive(Debug, Clone, PartialEq, Eq, Error)]
pub enum DurationError {
    #[error("\"{0}\" is not a number followed by a unit (ms, s, min, h or d)")]
    NotANumber(String),
    #[error("\"{0}\" has no unit; write it with ms, s, min, h or d, e.g. \"15 s\"")]
    NoUnit(String),
    #[error("\"{text}\": unknown unit \"{unit}\"; expected ms, s, min, h or d")]
    UnknownUnit { text: String, unit: String },
    #[error("\"{0}\" is negative")]
    Negative(String),
    #[error("\"{0}\" is longer than eqwatch can count (about 584 years)")]
    TooLong(String),
}

/// Parses `"250 ms"`, `"15 s"`, `"5 min"`, `"2 h"`, `"1 d"` (also `90s`, `1.5 h`).
/// A bare number is refused: a duration always says its unit.
pub fn parse_duration(text: &str) -> Result<Duration, DurationError> {
    let shown = || text.trim().to_string();
    let (value, unit) =
        split_quantity("duration", text).map_err(|_| DurationError::NotANumber(shown()))?;
    if unit.is_empty() {
        return Err(DurationError::NoUnit(shown()));
    }
    let ns_per_unit = match unit.to_ascii_lowercase().as_str() {
        "ms" | "msec" => 1e6,
        "s" | "sec" | "secs" | "second" | "seconds" => 1e9,
        "min" | "mins" | "minute" | "minutes" => 60e9,
        "h" | "hr" | "hour" | "hours" => 3600e9,
        "d" | "day" | "days" => 86_400e9,
        _ => {
            return Err(DurationError::UnknownUnit {
                text: shown(),
                unit: unit.to_string(),
            });
        }
    };
    if value < 0.0 {
        return Err(DurationError::Negative(shown()));
    }
    let ns = (value * ns_per_unit).round();
    // u64 nanoseconds: the largest whole-nanosecond span a Duration built here may hold.
    if ns >= u64::MAX as f64 {
        return Err(DurationError::TooLong(shown()));
    }
    Ok(Duration::from_nanos(ns as u64))
}

/// A duration for humans: `250 ms`, `15 s`, `5 min`, `2 h`, `1 d`, `1.5 s`.
pub(crate) fn show_duration(d: Duration) -> String {
    let ns = d.as_nanos();
    for (per, unit) in [
        (86_400_000_000_000u128, "d"),
        (3_600_000_000_000, "h"),
        (60_000_000_000, "min"),
        (1_000_000_000, "s"),
    ] {
        if ns >= per && ns.is_multiple_of(per) {
            return format!("{} {unit}", ns / per);
        }
    }
    if ns == 0 {
        "0 s".to_string()
    } else if ns < 1_000_000_000 && ns.is_multiple_of(1_000_000) {
        format!("{} ms", ns / 1_000_000)
    } else {
        format!("{} s", show_number(d.as_secs_f64()))
    }
}

// ---------------------------------------------------------------------------
// Raw configuration (the file as written)

#[cfg(test)]
mod tests {
    //! Check values: see `test_support` (the demo plant's own data, else invented).

    use super::*;
    use std::time::Duration;

    #[test]
    fn durations() {
        // Invented durations for the test; definitions 1 min = 60 s, 1 h = 3600 s, 1 d = 86400 s.
        let ok = [
            ("250 ms", Duration::from_millis(250)),
            ("15 s", Duration::from_secs(15)),
            ("90s", Duration::from_secs(90)),
            ("5 min", Duration::from_secs(300)),
            ("2 h", Duration::from_secs(7200)),
            ("1 d", Duration::from_secs(86_400)),
            ("1.5 s", Duration::from_millis(1500)),
            ("0.1 s", Duration::from_millis(100)),
            ("0 s", Duration::ZERO),
            ("  2 H ", Duration::from_secs(7200)),
            ("1e3 ms", Duration::from_secs(1)),
        ];
        for (text, expected) in ok {
            assert_eq!(parse_duration(text), Ok(expected), "{text}");
        }
        let kind = |e: &DurationError| match e {
            DurationError::NotANumber(_) => "not a number",
            DurationError::NoUnit(_) => "no unit",
            DurationError::UnknownUnit { .. } => "unknown unit",
            DurationError::Negative(_) => "negative",
            DurationError::TooLong(_) => "too long",
        };
        for (text, expected) in [
            ("15", "no unit"),
            ("fast", "not a number"),
            ("", "not a number"),
            ("NaN s", "not a number"),
            ("15 parsecs", "unknown unit"),
            ("-1 s", "negative"),
            ("1e300 d", "too long"),
        ] {
            match parse_duration(text) {
                Err(e) => assert_eq!(kind(&e), expected, "{text}: {e}"),
                Ok(d) => panic!("{text} accepted as {d:?}"),
            }
        }
        for (d, shown) in [
            (Duration::from_millis(250), "250 ms"),
            (Duration::from_secs(90), "90 s"),
            (Duration::from_secs(3600), "1 h"),
            (Duration::from_millis(1500), "1.5 s"),
            (Duration::ZERO, "0 s"),
        ] {
            assert_eq!(show_duration(d), shown);
        }
    }
}
