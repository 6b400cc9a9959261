//! The drift, alert, alarm and command sections of the configuration: their validation
//! into [`WatchSettings`] and [`CommandSettings`], every problem with its key path.

use std::time::Duration;

use crate::config::duration::{parse_duration, show_duration};
use crate::config::error::Problems;
use crate::config::raw::{RawAlarm, RawAlerts, RawCommands, RawDrift, RawPriority, RawReactor};
use crate::config::settings::CommandSettings;
use crate::monitor::alarm::{AlarmConfig, Direction, Priority};
use crate::monitor::watch::{
    AlarmSpec, BaselineSpec, DriftSettings, Figure, TrendMethod, WatchSettings,
};
use crate::units::{CompositionUnit, PressureUnit, split_quantity};

pub(crate) fn commands(problems: &mut Problems, raw: Option<&RawCommands>) -> CommandSettings {
    let Some(raw) = raw else {
        return CommandSettings::default();
    };
    for (key, list) in [
        ("allowed_users", &raw.allowed_users),
        ("allowed_clients", &raw.allowed_clients),
    ] {
        for (i, v) in list.iter().enumerate() {
            if v.trim().is_empty() || v.trim() != v {
                problems.add(
                    format!("commands.{key}[{i}]"),
                    "must be a name without surrounding spaces",
                );
            }
        }
    }
    CommandSettings {
        allowed_users: raw.allowed_users.clone(),
        allowed_clients: raw.allowed_clients.clone(),
    }
}

use crate::units::duration_ms as ms;

/// A temperature difference in K (`"20 K"`; a `degC` is the same size, a `degF` 5/9 of it).
/// The largest temperature difference a setting may name [common practice: reformer
/// outlets run near 1000 °C, so no approach, deadband or limit reaches 1000 K].
const MAX_KELVIN: f64 = 1000.0;

pub(crate) fn kelvin(problems: &mut Problems, path: &str, text: &str) -> Option<f64> {
    match split_quantity("temperature difference", text)
        .ok()
        .and_then(|(v, u)| crate::config::validate::inputs::kelvin_per_degree(u).map(|k| v * k))
    {
        Some(v) if v.abs() <= MAX_KELVIN => Some(v),
        Some(_) => {
            problems.add(
                path,
                format!(
                    "\"{text}\" is beyond ±{MAX_KELVIN} K, more than any reactor's temperature difference; check the number"
                ),
            );
            None
        }
        None => {
            problems.add(
                path,
                format!("\"{text}\" is not a temperature difference; write e.g. \"20 K\""),
            );
            None
        }
    }
}

fn positive_duration(problems: &mut Problems, path: &str, text: &str) -> Option<i64> {
    match parse_duration(text) {
        Ok(d) if !d.is_zero() => Some(ms(d)),
        Ok(_) => {
            problems.add(path, "must be above zero");
            None
        }
        Err(e) => {
            problems.add(path, e.to_string());
            None
        }
    }
}

fn count(problems: &mut Problems, path: &str, v: Option<i64>, default: usize, min: i64) -> usize {
    match v {
        None => default,
        Some(n) if n >= min && n <= 1_000_000 => n as usize,
        Some(n) => {
            problems.add(path, format!("{n} is out of range; give {min} to 1000000"));
            default
        }
    }
}

/// A delay: `"3 samples"` or a duration. Returns (ms, samples).
fn delay(problems: &mut Problems, path: &str, text: Option<&str>) -> (i64, u32) {
    let Some(text) = text else {
        return (0, 0);
    };
    let t = text.trim();
    if let Some(n) = t
        .strip_suffix("samples")
        .or_else(|| t.strip_suffix("sample"))
    {
        return match n.trim().parse::<u32>() {
            Ok(n) if n <= 10_000 => (0, n),
            _ => {
                problems.add(
                    path,
                    format!("\"{text}\": expected a whole number of samples, e.g. \"3 samples\""),
                );
                (0, 0)
            }
        };
    }
    match parse_duration(t) {
        Ok(d) => (ms(d), 0),
        Err(e) => {
            problems.add(
                path,
                format!("{e}; or give a sample count such as \"3 samples\""),
            );
            (0, 0)
        }
    }
}

pub(crate) fn watch(
    problems: &mut Problems,
    path: &str,
    reactor: &RawReactor,
    atmosphere_bar: f64,
) -> WatchSettings {
    let mut settings = WatchSettings::default();
    let raw = reactor.drift.clone().unwrap_or_default();
    let dp = format!("{path}.drift");
    drift_baseline(problems, &dp, &raw, &mut settings.drift);
    drift_statistics(problems, &dp, &raw, &mut settings.drift);
    drift_trend(problems, &dp, &raw, &mut settings.drift);
    if let Some(a) = reactor.alerts.as_ref() {
        engineering_alerts(problems, path, a, &mut settings);
    }
    settings.alarms = operator_alarms(problems, path, &reactor.alarm);
    if let Some(text) = reactor.offline_below.as_deref() {
        settings.offline_below_bar = offline_below(problems, path, text, atmosphere_bar);
    }
    settings
}

/// `drift.baseline`: learned (the default, over a window and a least number of samples)
/// or given with its σ.
fn drift_baseline(problems: &mut Problems, dp: &str, raw: &RawDrift, drift: &mut DriftSettings) {
    match raw.baseline.as_deref().map(str::trim) {
        None | Some("learn") => {
            let window_ms = match &raw.baseline_window {
                Some(t) => positive_duration(problems, &format!("{dp}.baseline_window"), t),
                None => None,
            };
            let min_samples = count(
                problems,
                &format!("{dp}.baseline_min_samples"),
                raw.baseline_min_samples,
                20,
                2,
            );
            let BaselineSpec::Learn { window_ms: w0, .. } = drift.baseline else {
                unreachable!("the default baseline is learned")
            };
            drift.baseline = BaselineSpec::Learn {
                window_ms: window_ms.unwrap_or(w0),
                min_samples,
            };
            if raw.baseline_sigma.is_some() {
                problems.add(
                    format!("{dp}.baseline_sigma"),
                    "goes with a given baseline (baseline = \"8 K\"); a learned baseline measures its own",
                );
            }
        }
        Some(text) => {
            let approach = kelvin(problems, &format!("{dp}.baseline"), text);
            let sigma = match &raw.baseline_sigma {
                Some(t) => kelvin(problems, &format!("{dp}.baseline_sigma"), t),
                None => {
                    problems.add(
                        format!("{dp}.baseline_sigma"),
                        "missing; a given baseline needs its σ, e.g. \"0.5 K\" (or baseline = \"learn\")",
                    );
                    None
                }
            };
            if let Some(sg) = sigma.filter(|s| *s <= 0.0) {
                problems.add(
                    format!("{dp}.baseline_sigma"),
                    format!("{sg} K must be above zero"),
                );
            }
            if raw.baseline_window.is_some() {
                problems.add(
                    format!("{dp}.baseline_window"),
                    "goes with baseline = \"learn\"",
                );
            }
            if let (Some(a), Some(sg)) = (approach, sigma) {
                drift.baseline = BaselineSpec::Given {
                    approach_k: a,
                    sigma_k: sg,
                };
            }
        }
    }
}

/// The step size, σ floor, EWMA and CUSUM parameters.
fn drift_statistics(problems: &mut Problems, dp: &str, raw: &RawDrift, drift: &mut DriftSettings) {
    if let Some(t) = &raw.step {
        match kelvin(problems, &format!("{dp}.step"), t) {
            Some(v) if v > 0.0 => drift.step_min_k = Some(v),
            Some(v) => problems.add(format!("{dp}.step"), format!("{v} K must be above zero")),
            None => {}
        }
    }
    if let Some(t) = &raw.sigma_floor
        && let Some(v) = kelvin(problems, &format!("{dp}.sigma_floor"), t)
    {
        if v > 0.0 {
            drift.sigma_floor_k = v;
        } else {
            problems.add(format!("{dp}.sigma_floor"), "must be above zero");
        }
    }
    for (key, v, lo, hi, slot) in [
        (
            "ewma_lambda",
            raw.ewma_lambda,
            0.0,
            1.0,
            &mut drift.ewma_lambda,
        ),
        ("ewma_l", raw.ewma_l, 0.0, 10.0, &mut drift.ewma_l),
        (
            "cusum_k",
            raw.cusum_k,
            -1e-12,
            10.0,
            &mut drift.cusum_k_sigma,
        ),
        ("cusum_h", raw.cusum_h, 0.0, 100.0, &mut drift.cusum_h_sigma),
    ] {
        if let Some(v) = v {
            if v.is_finite() && v > lo && v <= hi {
                *slot = v;
            } else {
                problems.add(
                    format!("{dp}.{key}"),
                    format!(
                        "{v} is out of range; expected above {} and at most {hi}",
                        lo.max(0.0)
                    ),
                );
            }
        }
    }
}

/// The trend method, the aggregates it is fitted on, its window, and the end-of-run limit.
fn drift_trend(problems: &mut Problems, dp: &str, raw: &RawDrift, drift: &mut DriftSettings) {
    match raw.trend.as_deref() {
        None | Some("least-squares") => drift.trend = TrendMethod::LeastSquares,
        Some("theil-sen") => drift.trend = TrendMethod::TheilSen,
        Some(o) => problems.add(
            format!("{dp}.trend"),
            format!("unknown method \"{o}\"; expected \"least-squares\" or \"theil-sen\""),
        ),
    }
    if let Some(t) = &raw.aggregate
        && let Some(v) = positive_duration(problems, &format!("{dp}.aggregate"), t)
    {
        drift.aggregate_ms = v;
    }
    drift.min_per_aggregate = count(
        problems,
        &format!("{dp}.min_per_aggregate"),
        raw.min_per_aggregate,
        drift.min_per_aggregate,
        1,
    );
    if let Some(t) = &raw.trend_window {
        drift.trend_window_ms = positive_duration(problems, &format!("{dp}.trend_window"), t);
        if let Some(w) = drift
            .trend_window_ms
            .filter(|w| *w < 3 * drift.aggregate_ms)
        {
            problems.add(
                format!("{dp}.trend_window"),
                format!(
                    "{} holds fewer than 3 aggregates of {}; lengthen it",
                    show_duration(Duration::from_millis(w as u64)),
                    show_duration(Duration::from_millis(drift.aggregate_ms as u64))
                ),
            );
        }
    }
    drift.min_aggregates = count(
        problems,
        &format!("{dp}.min_aggregates"),
        raw.min_aggregates,
        drift.min_aggregates,
        3,
    );
    if let Some(t) = &raw.end_of_run_limit {
        drift.end_of_run_limit_k = kelvin(problems, &format!("{dp}.end_of_run_limit"), t);
    }
}

/// Engineering alerts (they need the drift settings for the end-of-run limit).
fn engineering_alerts(
    problems: &mut Problems,
    path: &str,
    raw: &RawAlerts,
    settings: &mut WatchSettings,
) {
    let dp = format!("{path}.drift");
    let ap = format!("{path}.alerts");
    if let Some(t) = &raw.trend_above {
        settings.alerts.trend_above_k_per_day = rate(problems, &format!("{ap}.trend_above"), t);
    }
    if let Some(t) = &raw.end_of_run_within {
        settings.alerts.end_of_run_within_days =
            positive_duration(problems, &format!("{ap}.end_of_run_within"), t)
                .map(|v| v as f64 / 86_400_000.0);
        if settings.drift.end_of_run_limit_k.is_none() {
            problems.add(
                format!("{ap}.end_of_run_within"),
                format!("needs {dp}.end_of_run_limit (the approach at end of run, e.g. \"20 K\")"),
            );
        }
    }
    settings.alerts.cusum = raw.cusum.unwrap_or(false);
    if let Some(t) = &raw.data_quality_after {
        settings.alerts.data_quality_after_ms =
            positive_duration(problems, &format!("{ap}.data_quality_after"), t);
    }
    settings.alerts.self_monitoring = raw.self_monitoring.unwrap_or(true);
}

/// Operator alarms, each id once.
fn operator_alarms(problems: &mut Problems, path: &str, alarms: &[RawAlarm]) -> Vec<AlarmSpec> {
    let mut list: Vec<AlarmSpec> = Vec::new();
    for (i, a) in alarms.iter().enumerate() {
        let ap = format!("{path}.alarm[{i}]");
        if let Some(spec) = alarm(problems, &ap, a) {
            if list
                .iter()
                .any(|x| x.config.id.eq_ignore_ascii_case(&spec.config.id))
            {
                problems.add(
                    format!("{ap}.id"),
                    format!("\"{}\" is used twice", spec.config.id),
                );
            }
            list.push(spec);
        }
    }
    list
}

/// `offline_below`: the pressure below which the unit counts as off line, in bar absolute.
fn offline_below(
    problems: &mut Problems,
    path: &str,
    text: &str,
    atmosphere_bar: f64,
) -> Option<f64> {
    let kp = format!("{path}.offline_below");
    match split_quantity("pressure", text)
        .map_err(|e| e.to_string())
        .and_then(|(v, u)| {
            PressureUnit::parse(u)
                .map_err(|e| e.to_string())
                .and_then(|pu| {
                    pu.to_bar_absolute(v, atmosphere_bar)
                        .map_err(|e| e.to_string())
                })
        }) {
        Ok(bar) => Some(bar),
        Err(m) => {
            problems.add(kp, format!("\"{text}\": {m}; write e.g. \"5 barg\""));
            None
        }
    }
}

fn rate(problems: &mut Problems, path: &str, text: &str) -> Option<f64> {
    let per_day = match split_quantity("rate", text) {
        Ok((v, "K/d" | "K/day")) => Some(v),
        Ok((v, "K/h")) => Some(v * 24.0),
        Ok((v, "K/week" | "K/wk")) => Some(v / 7.0),
        Ok((v, "K/month")) => Some(v / 30.0),
        _ => None,
    };
    match per_day {
        Some(v) if v.is_finite() && v > 0.0 => Some(v),
        _ => {
            problems.add(
                path,
                format!(
                    "\"{text}\" is not a positive rate; write e.g. \"0.05 K/d\" (K/h, K/week also)"
                ),
            );
            None
        }
    }
}

fn alarm(problems: &mut Problems, path: &str, raw: &RawAlarm) -> Option<AlarmSpec> {
    let start = problems.len();
    alarm_name_and_rationale(problems, path, raw);
    let figure = match raw.on.as_str() {
        "approach" => Figure::Approach,
        "key-measured" => Figure::KeyMeasured,
        o => {
            problems.add(
                format!("{path}.on"),
                format!("unknown figure \"{o}\"; expected \"approach\" or \"key-measured\""),
            );
            return None;
        }
    };
    let value = |problems: &mut Problems, key: &str, text: &str| {
        limit_value(problems, path, figure, key, text)
    };
    let (limit, direction) = match (&raw.above, &raw.below) {
        (Some(t), None) => (value(problems, "above", t), Direction::High),
        (None, Some(t)) => (value(problems, "below", t), Direction::Low),
        _ => {
            problems.add(path, "give exactly one of `above` and `below`");
            (None, Direction::High)
        }
    };
    let deadband = match &raw.deadband {
        None => Some(0.0),
        Some(t) => value(problems, "deadband", t).map(|(v, sc, _)| {
            // A deadband is in the limit's unit; convert if written in another.
            match limit {
                Some((_, lsc, _)) => v * lsc / sc,
                None => v,
            }
        }),
    };
    let (on_delay_ms, on_delay_samples) = delay(
        problems,
        &format!("{path}.on_delay"),
        raw.on_delay.as_deref(),
    );
    let (off_delay_ms, off_delay_samples) = delay(
        problems,
        &format!("{path}.off_delay"),
        raw.off_delay.as_deref(),
    );
    let realarm_ms = raw
        .realarm
        .as_deref()
        .and_then(|t| positive_duration(problems, &format!("{path}.realarm"), t));
    let max_shelve_ms = match &raw.max_shelve {
        None => 8 * 3_600_000,
        Some(t) => positive_duration(problems, &format!("{path}.max_shelve"), t).unwrap_or(1),
    };
    let priority = priority(problems, path, raw);
    if let Some(db) = deadband.filter(|d| *d < 0.0) {
        problems.add(
            format!("{path}.deadband"),
            format!("{db} must not be negative"),
        );
    }
    if problems.len() > start {
        return None;
    }
    let (limit, scale, unit) = limit?;
    Some(AlarmSpec {
        config: AlarmConfig {
            id: raw.id.clone(),
            limit,
            direction,
            deadband: deadband.unwrap_or(0.0),
            on_delay_ms,
            off_delay_ms,
            on_delay_samples,
            off_delay_samples,
            realarm_ms,
            latched: raw.latched.unwrap_or(false),
            priority,
            max_shelve_ms,
        },
        figure,
        scale,
        unit,
        rationale: raw.rationale.trim().to_string(),
    })
}

/// An alarm's id (fit for topics, not a built-in alert's name) and its rationale.
fn alarm_name_and_rationale(problems: &mut Problems, path: &str, raw: &RawAlarm) {
    if raw.id.is_empty()
        || !raw
            .id
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_')
    {
        problems.add(
            format!("{path}.id"),
            format!("\"{}\" may use only letters, digits, `-` and `_`", raw.id),
        );
    }
    if ["trend", "end-of-run", "cusum", "data-quality", "flood"]
        .iter()
        .any(|r| raw.id.eq_ignore_ascii_case(r))
    {
        problems.add(
            format!("{path}.id"),
            format!(
                "\"{}\" is the name of a built-in alert; choose another",
                raw.id
            ),
        );
    }
    if raw.rationale.trim().len() < 10 {
        problems.add(
            format!("{path}.rationale"),
            "give the rationale (consequence and operator response): operator alarms are for rationalised conditions only",
        );
    }
}

/// A limit or deadband in the figure's unit: K for the approach, the written composition
/// unit for the key component (the limit's unit fixes the alarm's unit). Returns the value,
/// the scale from mole fraction and the unit's label.
fn limit_value(
    problems: &mut Problems,
    path: &str,
    figure: Figure,
    key: &str,
    text: &str,
) -> Option<(f64, f64, &'static str)> {
    let kp = format!("{path}.{key}");
    match figure {
        Figure::Approach => kelvin(problems, &kp, text).map(|v| (v, 1.0, "K")),
        Figure::KeyMeasured => match split_quantity("composition", text)
            .map_err(|e| e.to_string())
            .and_then(|(v, u)| {
                CompositionUnit::parse(u)
                    .map(|cu| (v, cu))
                    .map_err(|e| e.to_string())
            }) {
            Ok((v, cu)) if (0.0..=1.0).contains(&(v * cu.fraction_per_unit())) => {
                Some((v, 1.0 / cu.fraction_per_unit(), cu.label()))
            }
            Ok(_) => {
                problems.add(
                    kp,
                    format!("\"{text}\" is not a mole fraction between 0 and 100 mol%"),
                );
                None
            }
            Err(m) => {
                problems.add(kp, format!("\"{text}\": {m}; write e.g. \"10 ppm\""));
                None
            }
        },
    }
}

/// `priority`: 1 (highest) to 4, as a number or text; 3 by default.
fn priority(problems: &mut Problems, path: &str, raw: &RawAlarm) -> Priority {
    let number = match &raw.priority {
        None => Some(3),
        Some(RawPriority::Number(n)) => Some(*n),
        Some(RawPriority::Text(t)) => t.trim().parse::<i64>().ok(),
    };
    match number.and_then(Priority::from_number) {
        Some(pr) => pr,
        None => {
            let given = match &raw.priority {
                Some(RawPriority::Number(n)) => n.to_string(),
                Some(RawPriority::Text(t)) => format!("\"{t}\""),
                None => String::new(),
            };
            problems.add(
                format!("{path}.priority"),
                format!("priority {given} is not one of 1 (highest), 2, 3 or 4 (lowest)"),
            );
            Priority::P3
        }
    }
}

#[cfg(test)]
mod tests {
    //! Check values: see `test_support` (the demo plant's own data, else invented).

    use crate::config::files::load;
    use crate::config::test_support::{broken, config_dir};

    #[test]
    fn absurd_limits_deadbands_and_lags_are_refused_with_their_key() {
        // Issue 10 §1, reproduced first: check accepted a deadband of 1.8e19 K, a limit
        // of 1e300 K and an analyser lag of 3650 d.
        let demo = include_str!("../../../config/demo-plant.toml");
        let text = demo
            .replacen(
                "above = \"20 K\"\ndeadband = \"2 K\"",
                "above = \"1e300 K\"\ndeadband = \"1.8e19 K\"",
                1,
            )
            .replacen("above = \"5 ppm\"", "above = \"200 mol%\"", 1)
            .replacen("lag = \"60 s\"", "lag = \"3650 d\"", 1);
        let e = crate::config::test_support::refused(&text).to_string();
        for (key, says) in [
            ("reactors.ref1.alarm[0].above", "beyond ±1000 K"),
            ("reactors.ref1.alarm[0].deadband", "beyond ±1000 K"),
            (
                "reactors.mth1.alarm[0].above",
                "not a mole fraction between 0 and 100 mol%",
            ),
            (
                "reactors.ref1.composition.lag",
                "longer than any analyser lag",
            ),
        ] {
            assert!(
                e.lines().any(|l| l.contains(key) && l.contains(says)),
                "{key}: {says}\n{e}"
            );
        }
    }

    #[test]
    fn drift_alert_and_alarm_sections_say_what_to_fix() {
        let e = broken("bad-alarms.toml");
        let msgs: Vec<String> = e
            .problems
            .iter()
            .map(|p| format!("{}: {}", p.path, p.message))
            .collect();
        let has = |path: &str, text: &str| {
            assert!(
                e.problems
                    .iter()
                    .any(|p| p.path == path && p.message.contains(text)),
                "no problem at {path} containing {text:?}; got:\n{}",
                msgs.join("\n")
            )
        };
        has("reactors.lts1.offline_below", "\"5 psi\"");
        has("reactors.lts1.drift.trend", "unknown method \"spline\"");
        has(
            "reactors.lts1.drift.end_of_run_limit",
            "not a temperature difference",
        );
        has("reactors.lts1.alerts.trend_above", "not a positive rate");
        has(
            "reactors.lts1.alarm[0]",
            "exactly one of `above` and `below`",
        );
        has("reactors.lts1.alarm[0].rationale", "give the rationale");
        has("reactors.lts1.alarm[1].above", "\"5 K\"");
        has("reactors.lts1.alarm[1].on_delay", "\"3 samples\"");
        assert_eq!(e.problems.len(), 8, "{}", msgs.join("\n"));
    }

    #[test]
    fn the_demo_plant_watch_settings() {
        // config/demo-plant.toml (invented): ref1 has one rationalised alarm, 20 K high
        // with a 2 K deadband and a 2-sample on-delay; lts1 forecasts end of run at 20 K.
        let s = load(&config_dir().join("demo-plant.toml")).unwrap();
        let ref1 = &s.reactors[0].spec.watch;
        assert_eq!(ref1.alarms.len(), 1);
        let a = &ref1.alarms[0].config;
        assert_eq!(
            (a.id.as_str(), a.limit, a.deadband, a.on_delay_samples),
            ("approach-high", 20.0, 2.0, 2)
        );
        assert_eq!(a.realarm_ms, Some(8 * 3_600_000));
        let lts = &s.reactors[2].spec.watch;
        assert_eq!(lts.drift.end_of_run_limit_k, Some(20.0));
        assert_eq!(lts.alerts.end_of_run_within_days, Some(90.0));
        // 20 barg on a 1.01325 bar atmosphere.
        assert!((ref1.offline_below_bar.unwrap() - 21.01325).abs() < 1e-12);
        // The methanator alarm is in ppm: 5 ppm = 5e-6 mole fraction.
        let m = &s.reactors[3].spec.watch.alarms[0];
        assert_eq!((m.config.limit, m.unit), (5.0, "ppm"));
        assert!((m.scale - 1e6).abs() < 1e-6);
        assert_eq!(s.commands.allowed_users, ["op-demo", "eng-demo"]);
    }
}
