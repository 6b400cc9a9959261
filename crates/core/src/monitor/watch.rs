//! Per-reactor watch over the evaluations: drift statistics against a start-of-run
//! baseline (EWMA, CUSUM, trend on steady-state aggregates, end-of-run forecast), the
//! engineering alerts they raise, the operator alarms the configuration rationalises,
//! operator commands, and the alarm-system self-monitoring (chattering and stale alarms
//! per reactor; floods plant-wide in [`PlantWatch`]).
//!
//! Pure: no I/O, no clock; every call takes the time. Wire formats live in the shell.
//!
//! # What goes into the statistics
//! Only good or uncertain evaluations with an approach figure, not flagged `transient`,
//! taken while the unit is on line. Bad ones, transients and shutdowns are counted as
//! excluded and leave the baseline, EWMA, CUSUM and aggregates untouched (docs/domain.md §7:
//! leave shutdowns and rate cuts out).
//!
//! # Alerts and alarms (docs/domain.md §6)
//! Both use the ISA-18.2 state machine of [`super::alarm`]. Alerts are for the engineer
//! (trend rate, end of run near, CUSUM signal, data quality, chattering, stale); alarms
//! are for the operator, only those configured with a rationale. Operator alarms are
//! suppressed by design while the analysis is bad or the unit is off line; alerts are
//! suppressed by design while the unit is off line.
//!
//! # References
//! - ISA-18.2-2016 / IEC 62682:2014 alarm states; EEMUA 191 (3rd ed.) performance
//!   figures: flood > 10 alarms in 10 min per operator, chattering ≥ 3 activations a
//!   minute, stale > 24 h (as summarised in docs/domain.md §6).

use std::collections::VecDeque;

use super::alarm::{Alarm, AlarmConfig, AlarmError, Direction, Event, EventKind, Priority};
use super::drift::{Cusum, CusumPoint, CusumState, EndOfRun, Ewma, EwmaPoint, Shift, Trend};
use super::{Evaluation, Quality, ReasonCode};
use crate::units::fmt_num;

use crate::units::MINUTE_MS;
/// A day in milliseconds as a float (rates per day).
const DAY_MS: f64 = crate::units::DAY_MS as f64;
const OFFLINE_REASON: &str = "unit off line";

/// How the trend line is fitted.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TrendMethod {
    LeastSquares,
    TheilSen,
}

impl TrendMethod {
    pub fn as_str(self) -> &'static str {
        match self {
            Self::LeastSquares => "least-squares",
            Self::TheilSen => "theil-sen",
        }
    }
}

/// Where the start-of-run baseline comes from.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum BaselineSpec {
    /// Mean and standard deviation of the usable samples in the first `window_ms` of the
    /// run (at least `min_samples` of them, else learning goes on).
    Learn {
        window_ms: i64,
        min_samples: usize,
    },
    Given {
        approach_k: f64,
        sigma_k: f64,
    },
}

#[derive(Debug, Clone, PartialEq)]
pub struct DriftSettings {
    pub baseline: BaselineSpec,
    /// A learned σ is at least this (K), so a quiet start does not make a hair trigger.
    pub sigma_floor_k: f64,
    pub ewma_lambda: f64,
    pub ewma_l: f64,
    /// CUSUM reference value and decision interval, in baseline σ.
    pub cusum_k_sigma: f64,
    pub cusum_h_sigma: f64,
    /// A level shift at least this large (K) is a step: the trend and the end-of-run
    /// forecast start again after it, and the `cusum` alert watches it. None: h (in K).
    pub step_min_k: Option<f64>,
    /// A step is a level change of at least `step_min_k` within this time (ms): the
    /// CUSUM's successive shifts within it add up (a 6-hour ramp is one step), while a
    /// slow drift, whose shifts are far apart, never makes one.
    pub step_window_ms: i64,
    pub trend: TrendMethod,
    /// Steady-state aggregate period (ms): one trend point per period.
    pub aggregate_ms: i64,
    /// Usable samples an aggregate needs to count.
    pub min_per_aggregate: usize,
    /// Only aggregates this recent go into the trend (None: all since the baseline).
    pub trend_window_ms: Option<i64>,
    /// Aggregates needed before a trend is reported (at least 3).
    pub min_aggregates: usize,
    /// Approach at which the catalyst is at end of run (K).
    pub end_of_run_limit_k: Option<f64>,
    /// Bed profile: the front depth at which the catalyst is spent (m); the front's
    /// daily trend and its forecast run only where this is set.
    pub front_end_of_life_m: Option<f64>,
    /// The statistics on the normalised approach (a start-of-run regression on the
    /// operating conditions), where configured.
    pub normalise: Option<NormaliseSpec>,
}

/// An operating condition the approach is normalised for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ContextInput {
    /// The dry gas flow in (or, without an inlet meter, out), kmol/h.
    Throughput,
    /// The steam-to-dry-gas ratio used by the evaluation (measured).
    SteamRatio,
    /// The bed inlet temperature (the bed profile's first thermocouple, else the
    /// bed-rise inlet), K.
    InletTemperature,
    /// Bar absolute.
    Pressure,
}

impl ContextInput {
    pub fn name(self) -> &'static str {
        match self {
            Self::Throughput => "throughput",
            Self::SteamRatio => "steam_ratio",
            Self::InletTemperature => "inlet_temperature",
            Self::Pressure => "pressure",
        }
    }

    pub fn unit(self) -> &'static str {
        match self {
            Self::Throughput => "kmol/h",
            Self::SteamRatio => "mol/mol",
            Self::InletTemperature => "K",
            Self::Pressure => "bar abs",
        }
    }
}

/// The normalised approach: which conditions, and the regression's settings (learned
/// over the baseline window).
#[derive(Debug, Clone, PartialEq)]
pub struct NormaliseSpec {
    pub inputs: Vec<ContextInput>,
    pub config: crate::normalise::Config,
}

impl Default for DriftSettings {
    /// Defaults [common practice]: λ = 0.2, L = 3; CUSUM k = 0.5σ, h = 5σ; daily aggregates.
    fn default() -> Self {
        Self {
            baseline: BaselineSpec::Learn {
                window_ms: 7 * 86_400_000,
                min_samples: 20,
            },
            sigma_floor_k: 0.2,
            ewma_lambda: 0.2,
            ewma_l: 3.0,
            cusum_k_sigma: 0.5,
            cusum_h_sigma: 5.0,
            step_min_k: None,
            step_window_ms: 86_400_000,
            trend: TrendMethod::LeastSquares,
            aggregate_ms: 86_400_000,
            min_per_aggregate: 6,
            trend_window_ms: None,
            min_aggregates: 5,
            end_of_run_limit_k: None,
            front_end_of_life_m: None,
            normalise: None,
        }
    }
}

/// Engineering alerts (each off when `None`/false).
#[derive(Debug, Clone, PartialEq)]
pub struct AlertSettings {
    pub trend_above_k_per_day: Option<f64>,
    pub end_of_run_within_days: Option<f64>,
    pub cusum: bool,
    /// Raise when no good result has come for this long.
    pub data_quality_after_ms: Option<i64>,
    /// Chattering and stale-alarm alerts for the operator alarms.
    pub self_monitoring: bool,
    /// Raise when the bed rises this much (K) more than its inlet CO and CO2 explain.
    pub bed_rise_excess_k: Option<f64>,
    /// Raise when the reconciliation's global test fails this many results in a row
    /// (a gross error in an analyser or a meter).
    pub gross_error_samples: Option<u32>,
}

impl Default for AlertSettings {
    fn default() -> Self {
        Self {
            trend_above_k_per_day: None,
            end_of_run_within_days: None,
            cusum: false,
            data_quality_after_ms: None,
            self_monitoring: true,
            bed_rise_excess_k: None,
            gross_error_samples: None,
        }
    }
}

/// The figure an operator alarm watches.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Figure {
    /// Approach of the first reaction, K.
    Approach,
    /// Measured key component, in `AlarmSpec::unit` (mole fraction × scale).
    KeyMeasured,
}

/// A rationalised operator alarm.
#[derive(Debug, Clone, PartialEq)]
pub struct AlarmSpec {
    /// `config.id` is the alarm's name within the reactor (e.g. `approach-high`).
    pub config: AlarmConfig,
    pub figure: Figure,
    /// Multiplier from the figure's base unit (K, or mole fraction) to `unit`.
    pub scale: f64,
    pub unit: &'static str,
    /// Why the alarm exists and what the operator does (the rationalisation record).
    pub rationale: String,
}

#[derive(Debug, Clone, PartialEq, Default)]
pub struct WatchSettings {
    pub drift: DriftSettings,
    pub alerts: AlertSettings,
    pub alarms: Vec<AlarmSpec>,
    /// The unit counts as off line while its pressure is below this (bar absolute).
    pub offline_below_bar: Option<f64>,
}

/// Alert or alarm.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Class {
    Alert,
    Alarm,
}

impl Class {
    pub fn as_str(self) -> &'static str {
        match self {
            Self::Alert => "alert",
            Self::Alarm => "alarm",
        }
    }
}

/// One alert or alarm with what it watches.
#[derive(Debug, Clone)]
pub struct Watched {
    pub class: Class,
    pub alarm: Alarm,
    pub unit: &'static str,
    pub description: String,
    /// The last value given to the state machine.
    pub value: Option<f64>,
    figure: Source,
    /// Activation times within the last minute (chattering).
    activations: VecDeque<i64>,
    /// Since when the alarm has been annunciating with its condition on.
    active_since_ms: Option<i64>,
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum Source {
    Figure(Figure, f64),
    Trend,
    EndOfRun,
    Cusum,
    DataQuality,
    /// The unit's pressure against `offline_below` (one state change per trip).
    Offline,
    /// The bed rise above what the inlet CO and CO2 explain, K.
    BedRise,
    /// The reconciliation's global test statistic over its critical value.
    GrossError,
    /// Chattering of the alarm at this index.
    Chatter(usize),
    /// Stale alarm at this index.
    Stale(usize),
}

/// An event for the shell to publish.
#[derive(Debug, Clone, PartialEq)]
pub struct WatchEvent {
    pub class: Class,
    /// Index into [`ReactorWatch::watched`].
    pub index: usize,
    pub event: Event,
}

/// What a run has learned, to carry it over a daemon restart (the shell stores it).
#[derive(Debug, Clone, PartialEq, Default)]
pub struct DriftSnapshot {
    pub run_start_ms: Option<i64>,
    pub learn_n: usize,
    pub learn_mean: f64,
    pub learn_m2: f64,
    pub baseline: Option<Baseline>,
    /// EWMA statistic and sample count.
    pub ewma: Option<(f64, u32)>,
    pub cusum: Option<CusumState>,
    /// The last step and the level before a standing upward one.
    pub step: Option<Step>,
    pub step_reference_k: Option<f64>,
    /// Open aggregate: start, count, sum.
    pub bucket: Option<(i64, usize, f64)>,
    /// Closed aggregates: (day since the run start, mean approach K).
    pub aggregates: Vec<(f64, f64)>,
    /// The bed front's daily means (day since the epoch, m).
    pub front_daily: Vec<(i64, f64)>,
    /// The normalisation of the run.
    pub norm: Option<NormState>,
}

/// A level shift of at least the step size (see [`DriftSettings::step_min_k`]).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Step {
    pub shift: Shift,
    /// When the CUSUM signalled it.
    pub detected_ms: i64,
}

/// Baseline state.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Baseline {
    pub approach_k: f64,
    pub sigma_k: f64,
    pub given: bool,
    /// When the run (and the baseline window) started.
    pub since_ms: i64,
}

/// The end-of-run forecast.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Forecast {
    /// No limit configured.
    NoLimit,
    /// Not enough aggregates yet.
    NoTrend,
    NotRising,
    /// The fitted line is already at or above the limit.
    Reached,
    At {
        at_ms: i64,
        earliest_ms: i64,
        latest_ms: Option<i64>,
    },
}

/// The fitted trend as published.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TrendFigures {
    pub method: TrendMethod,
    pub slope_k_per_day: f64,
    pub slope_interval_k_per_day: (f64, f64),
    /// Fitted approach at the last aggregate, K, and the 95 % prediction half-width there.
    pub fitted_k: f64,
    pub band_k: f64,
    pub points: usize,
    /// The fit, for plotting: approach(t) = intercept + slope·(t − origin)/day.
    pub origin_ms: i64,
    pub intercept_k: f64,
    pub first_ms: i64,
    pub last_ms: i64,
    pub fit: Trend,
}

/// Why an evaluation was left out of the drift statistics.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Exclusion {
    /// The process unit is off line (pressure below its threshold).
    UnitOffline,
    /// The evaluation is bad.
    BadQuality,
    /// The temperature moved too fast over the analyser lag.
    Transient,
    /// No finite approach to watch.
    NoApproach,
    /// Normalised statistics: a context input has no usable value.
    NoContext,
    /// Normalised statistics: the conditions lie outside those the regression learned.
    OutsideLearnedRange,
}

impl Exclusion {
    /// The word on the wire (`drift.excluded_because`).
    pub fn as_str(self) -> &'static str {
        match self {
            Self::UnitOffline => "unit_offline",
            Self::BadQuality => "bad_quality",
            Self::Transient => "transient",
            Self::NoApproach => "no_approach",
            Self::NoContext => "no_context",
            Self::OutsideLearnedRange => "outside_learned_range",
        }
    }
}

/// The drift figures after one evaluation.
#[derive(Debug, Clone, PartialEq)]
pub struct DriftFigures {
    /// Why the sample was left out of the statistics, if it was.
    pub excluded: Option<Exclusion>,
    pub learning: bool,
    pub baseline: Option<Baseline>,
    pub ewma: Option<EwmaPoint>,
    /// Upper and lower CUSUM statistics (K) and the decision interval h (K).
    pub cusum_k: Option<f64>,
    pub cusum_lower_k: Option<f64>,
    pub cusum_h_k: Option<f64>,
    /// The level the CUSUM is taken against (the baseline, then the level after a shift).
    pub cusum_reference_k: Option<f64>,
    /// A shift was found at this sample.
    pub cusum_signal: bool,
    /// The last step (a shift of at least `step_min_k`), and its size threshold (K).
    pub step: Option<Step>,
    pub step_min_k: Option<f64>,
    /// How far the level stands above the level before the last upward step (K).
    pub standing_step_k: Option<f64>,
    pub trend: Option<TrendFigures>,
    pub forecast: Forecast,
    pub limit_k: Option<f64>,
    /// The bed's reaction front: its movement and end-of-life forecast, once enough
    /// daily figures are in; and the daily figures so far.
    pub front: Option<crate::bedprofile::FrontForecast>,
    pub front_days: usize,
    /// The normalised approach, where configured.
    pub normalised: Option<NormalisedFigures>,
}

/// Where the normalisation stands.
#[derive(Debug, Clone, PartialEq)]
pub enum NormState {
    /// Learning over the start-of-run window.
    Learning(crate::normalise::Learner),
    /// Fitted: the statistics run on the normalised approach.
    Ready(Box<crate::normalise::Model>),
    /// The fit was refused (too few samples, collinear inputs): the statistics run on
    /// the raw approach for this run, and this says why.
    Unavailable(String),
}

/// The normalised approach of one sample and the regression behind it.
#[derive(Debug, Clone, PartialEq)]
pub struct NormalisedFigures {
    /// `learning`, `ready` or `unavailable`.
    pub state: &'static str,
    /// Learning samples so far, and needed.
    pub samples: u64,
    pub min_samples: u64,
    /// Why there is no fit (unavailable).
    pub unavailable_because: Option<String>,
    pub fit: Option<crate::normalise::Fit>,
    /// This sample's figures; or why it has none.
    pub sample: Option<crate::normalise::Normalised>,
    pub refused: Option<String>,
}

/// An operator or engineer command.
#[derive(Debug, Clone, PartialEq)]
pub enum Action {
    Acknowledge,
    Shelve {
        duration_ms: i64,
        reason: String,
    },
    Unshelve,
    OutOfService {
        reason: String,
    },
    ReturnToService,
    ResetLatch,
    /// Starts a new run: baseline, statistics and aggregates from now.
    Rebaseline {
        reason: String,
    },
}

impl Action {
    pub fn as_str(&self) -> &'static str {
        match self {
            Self::Acknowledge => "acknowledge",
            Self::Shelve { .. } => "shelve",
            Self::Unshelve => "unshelve",
            Self::OutOfService { .. } => "out-of-service",
            Self::ReturnToService => "return-to-service",
            Self::ResetLatch => "reset-latch",
            Self::Rebaseline { .. } => "re-baseline",
        }
    }
}

#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CommandError {
    #[error("no alert or alarm \"{0}\" on this reactor; known: {1}")]
    UnknownAlarm(String, String),
    #[error("\"{0}\" needs an alarm id (field \"alarm\")")]
    NeedsAlarm(&'static str),
    #[error("{0}")]
    Refused(#[from] AlarmError),
}

#[derive(Debug, Clone, Default)]
struct Bucket {
    start_ms: i64,
    n: usize,
    sum: f64,
}

/// The watch over one reactor.
#[derive(Debug, Clone)]
pub struct ReactorWatch {
    pub watched: Vec<Watched>,
    run_start_ms: Option<i64>,
    learn_n: usize,
    learn_mean: f64,
    learn_m2: f64,
    baseline: Option<Baseline>,
    ewma: Option<Ewma>,
    last_ewma: Option<EwmaPoint>,
    cusum: Option<Cusum>,
    cusum_last: Option<CusumPoint>,
    /// The last step, and the level before a standing upward step.
    step: Option<Step>,
    step_reference_k: Option<f64>,
    /// The CUSUM's shifts within the step window, with when each was found.
    recent_shifts: VecDeque<(Shift, i64)>,
    bucket: Option<Bucket>,
    /// (day since run start at the bucket middle, mean approach, bucket start ms)
    aggregates: Vec<(f64, f64)>,
    trend: Option<TrendFigures>,
    /// The forecast of `trend`, worked out when the trend changes.
    forecast: Option<Forecast>,
    work: Vec<f64>,
    last_good_ms: Option<i64>,
    started_ms: Option<i64>,
    offline: bool,
    /// When the unit went off line, and the off-line time since the last good result
    /// (it does not count toward the data-quality timer).
    offline_since_ms: Option<i64>,
    paused_ms: i64,
    analysis_bad: Option<String>,
    excluded: u64,
    /// Daily front depths of the bed profile (steady, usable samples), and the forecast
    /// worked out when a day completes.
    pub(crate) front: crate::bedprofile::FrontTrend,
    front_forecast: Option<crate::bedprofile::FrontForecast>,
    /// The normalisation of this run (None until the first sample where configured).
    pub(crate) norm: Option<NormState>,
}

fn alert_config(id: &str, limit: f64, direction: Direction, deadband: f64) -> AlarmConfig {
    AlarmConfig {
        id: id.into(),
        limit,
        direction,
        deadband,
        on_delay_ms: 0,
        off_delay_ms: 0,
        on_delay_samples: 0,
        off_delay_samples: 0,
        realarm_ms: None,
        latched: false,
        priority: Priority::P4,
        max_shelve_ms: 30 * 86_400_000,
    }
}

impl Watched {
    /// A fresh alarm or alert over `figure`; the configuration is validated here.
    fn build(
        class: Class,
        cfg: AlarmConfig,
        unit: &'static str,
        description: String,
        figure: Source,
    ) -> Result<Self, AlarmError> {
        Alarm::new(cfg).map(|alarm| Self {
            class,
            alarm,
            unit,
            description,
            value: None,
            figure,
            activations: VecDeque::new(),
            active_since_ms: None,
        })
    }
}

/// The operator alarms of the configuration, each with its rationale.
fn push_configured_alarms(
    settings: &WatchSettings,
    watched: &mut Vec<Watched>,
) -> Result<(), AlarmError> {
    for a in &settings.alarms {
        watched.push(Watched::build(
            Class::Alarm,
            a.config.clone(),
            a.unit,
            a.rationale.clone(),
            Source::Figure(a.figure, a.scale),
        )?);
    }
    Ok(())
}

/// The drift alerts: trend rate, end of run, CUSUM step.
fn push_drift_alerts(
    settings: &WatchSettings,
    watched: &mut Vec<Watched>,
) -> Result<(), AlarmError> {
    let al = &settings.alerts;
    if let Some(rate) = al.trend_above_k_per_day {
        watched.push(Watched::build(
            Class::Alert,
            alert_config("trend", rate, Direction::High, 0.2 * rate.abs()),
            "K/d",
            format!("approach rising faster than {} K/d", fmt_num(rate, 3)),
            Source::Trend,
        )?);
    }
    if let (Some(days), Some(limit)) =
        (al.end_of_run_within_days, settings.drift.end_of_run_limit_k)
    {
        watched.push(Watched::build(
            Class::Alert,
            alert_config("end-of-run", days, Direction::Low, 0.1 * days),
            "d",
            format!(
                "end of run ({} K) forecast within {} d",
                fmt_num(limit, 3),
                fmt_num(days, 3)
            ),
            Source::EndOfRun,
        )?);
    }
    if al.cusum {
        // The standing upward step (K) against the step size; the limit is the
        // configured step size, or h (5σ by default) once the baseline is known.
        let limit = settings.drift.step_min_k.unwrap_or(f64::MAX);
        watched.push(Watched::build(
            Class::Alert,
            alert_config("cusum", limit, Direction::High, 0.25 * limit.min(1e300)),
            "K",
            "approach stepped up against its level before the step (two-sided CUSUM level-shift test, Page 1954)".into(),
            Source::Cusum,
        )?);
    }
    Ok(())
}

/// The alerts on the unit's condition: data quality, bed rise, off line.
fn push_condition_alerts(
    settings: &WatchSettings,
    watched: &mut Vec<Watched>,
) -> Result<(), AlarmError> {
    let al = &settings.alerts;
    if let Some(after) = al.data_quality_after_ms {
        let min = after as f64 / MINUTE_MS as f64;
        watched.push(Watched::build(
            Class::Alert,
            alert_config("data-quality", min, Direction::High, 0.0),
            "min",
            format!(
                "no good on-line result for more than {} min",
                fmt_num(min, 3)
            ),
            Source::DataQuality,
        )?);
    }
    if let Some(excess) = al.bed_rise_excess_k {
        let mut c = alert_config("bed-rise", excess, Direction::High, 0.25 * excess);
        c.on_delay_samples = 2;
        c.off_delay_samples = 2;
        watched.push(Watched::build(
            Class::Alert,
            c,
            "K",
            format!(
                "bed rises more than {} K above what the inlet CO and CO2 explain: carbon oxides breaking through from upstream? check the CO2 removal and the shift converters, and the methanator temperatures",
                fmt_num(excess, 3)
            ),
            Source::BedRise,
        )?);
    }
    if let Some(n) = al.gross_error_samples {
        // γ/γ_crit above 1 on `n` results in a row: at a 5 % test on independent
        // results, three in a row by chance is about 1 in 8000. It clears only once the
        // statistic is back below half its critical value for 4n results: a drifting
        // instrument hovers about the limit before it is clearly wrong.
        let mut c = alert_config("gross-error", 1.0, Direction::High, 0.5);
        c.on_delay_samples = n;
        c.off_delay_samples = 4 * n;
        watched.push(Watched::build(
            Class::Alert,
            c,
            "x critical",
            "inlet/outlet element balances fail the global test: a gross error in an analyser or a flow meter (the result's reconciliation.suspect names the most likely one)".into(),
            Source::GrossError,
        )?);
    }
    if let Some(limit) = settings.offline_below_bar {
        // One alert per trip and return; it is never suppressed itself.
        watched.push(Watched::build(
            Class::Alert,
            alert_config("off-line", limit, Direction::Low, 0.0),
            "bar",
            format!(
                "unit off line (pressure below {} bar abs): alerts and alarms suppressed by design, statistics paused",
                fmt_num(limit, 3)
            ),
            Source::Offline,
        )?);
    }
    Ok(())
}

/// Chattering and stale alerts over each configured alarm.
fn push_self_monitoring_alerts(
    settings: &WatchSettings,
    watched: &mut Vec<Watched>,
) -> Result<(), AlarmError> {
    for (i, alarm) in settings.alarms.iter().enumerate() {
        let id = alarm.config.id.clone();
        watched.push(Watched::build(
            Class::Alert,
            alert_config(&format!("chattering:{id}"), 2.5, Direction::High, 1.0),
            "per min",
            format!("alarm {id} chattering: 3 or more activations in a minute"),
            Source::Chatter(i),
        )?);
        watched.push(Watched::build(
            Class::Alert,
            alert_config(&format!("stale:{id}"), 24.0, Direction::High, 0.0),
            "h",
            format!("alarm {id} stale: active for more than 24 h"),
            Source::Stale(i),
        )?);
    }
    Ok(())
}

impl ReactorWatch {
    /// Builds the watch; alarm configurations are validated here.
    pub fn new(settings: &WatchSettings) -> Result<Self, AlarmError> {
        let mut watched = Vec::new();
        push_configured_alarms(settings, &mut watched)?;
        push_drift_alerts(settings, &mut watched)?;
        push_condition_alerts(settings, &mut watched)?;
        if settings.alerts.self_monitoring {
            push_self_monitoring_alerts(settings, &mut watched)?;
        }
        Ok(Self::fresh(watched))
    }

    /// A watch over `watched` with no history: learning from the first sample.
    fn fresh(watched: Vec<Watched>) -> Self {
        Self {
            watched,
            run_start_ms: None,
            learn_n: 0,
            learn_mean: 0.0,
            learn_m2: 0.0,
            baseline: None,
            ewma: None,
            last_ewma: None,
            cusum: None,
            cusum_last: None,
            step: None,
            step_reference_k: None,
            recent_shifts: VecDeque::new(),
            bucket: None,
            aggregates: Vec::new(),
            trend: None,
            forecast: None,
            work: Vec::new(),
            last_good_ms: None,
            started_ms: None,
            offline: false,
            offline_since_ms: None,
            paused_ms: 0,
            analysis_bad: None,
            excluded: 0,
            front: crate::bedprofile::FrontTrend::default(),
            front_forecast: None,
            norm: None,
        }
    }

    /// The value the statistics take (the normalised approach once the regression is
    /// fitted, else the raw approach), the exclusion after normalisation, and the figures
    /// to publish. While learning, each usable sample with every context input teaches
    /// the regression; the fit is made when the baseline window ends ([`Self::sample`]).
    fn normalise(
        &mut self,
        s: &DriftSettings,
        e: &Evaluation,
        excluded: Option<Exclusion>,
        approach: Option<f64>,
    ) -> (Option<Exclusion>, Option<f64>, Option<NormalisedFigures>) {
        let Some(spec) = &s.normalise else {
            return (excluded, approach, None);
        };
        self.norm.get_or_insert_with(|| {
            match crate::normalise::Learner::new(spec.config.clone()) {
                Ok(l) => NormState::Learning(l),
                Err(err) => NormState::Unavailable(err.to_string()),
            }
        });
        let mut fig = NormalisedFigures {
            state: "learning",
            samples: 0,
            min_samples: spec.config.min_samples,
            unavailable_because: None,
            fit: None,
            sample: None,
            refused: None,
        };
        let context: Option<Vec<f64>> = e.context.iter().copied().collect();
        let missing = || {
            spec.inputs
                .iter()
                .zip(&e.context)
                .filter(|(_, v)| v.is_none())
                .map(|(c, _)| c.name())
                .collect::<Vec<_>>()
                .join(", ")
        };
        let closes = self.closes_baseline_window(s, e.sample_ts_ms);
        let Some(state) = self.norm.as_mut() else {
            return (excluded, approach, Some(fig));
        };
        match (state, excluded, approach) {
            // The sample that closes the baseline window is not learned (nor is it in
            // the baseline): it is the first the fit is made for.
            (NormState::Learning(_), None, Some(_)) if closes => {}
            (NormState::Learning(l), None, Some(a)) => match &context {
                Some(x) => {
                    if let Err(err) = l.learn(x, a) {
                        fig.refused = Some(format!("not learned from: {err}"));
                    }
                }
                None => fig.refused = Some(format!("not learned from: no usable {}", missing())),
            },
            (NormState::Ready(m), None, Some(a)) => {
                let Some(x) = &context else {
                    fig.refused = Some(format!("no usable {}", missing()));
                    return (Some(Exclusion::NoContext), None, Some(fig));
                };
                match m.residual(x, a) {
                    Ok(n) => {
                        fig.sample = Some(n);
                        return (None, Some(n.normalised), Some(fig));
                    }
                    Err(r) => {
                        fig.refused = Some(r.to_string());
                        return (Some(Exclusion::OutsideLearnedRange), None, Some(fig));
                    }
                }
            }
            _ => {}
        }
        (excluded, approach, Some(fig))
    }

    /// Whether a usable sample at `t` ends the learning of the baseline ([`Self::sample`]).
    fn closes_baseline_window(&self, s: &DriftSettings, t: i64) -> bool {
        match (s.baseline, self.baseline, self.run_start_ms) {
            (
                BaselineSpec::Learn {
                    window_ms,
                    min_samples,
                },
                None,
                Some(start),
            ) => t - start >= window_ms && self.learn_n >= min_samples,
            _ => false,
        }
    }

    /// Fills in the normalisation's state, sample count and fit.
    fn describe_norm(&self, fig: &mut NormalisedFigures) {
        match &self.norm {
            Some(NormState::Learning(l)) => {
                fig.state = "learning";
                fig.samples = l.samples();
            }
            Some(NormState::Ready(m)) => {
                fig.state = "ready";
                fig.samples = m.fit().n;
                fig.fit = Some(m.fit().clone());
            }
            Some(NormState::Unavailable(why)) => {
                fig.state = "unavailable";
                fig.unavailable_because = Some(why.clone());
            }
            None => {}
        }
    }

    /// At the end of the baseline window: the regression's fit, and the baseline of the
    /// normalised approach (its mean over the window is the reference approach and its
    /// spread the residual standard error). `None`: no normalisation, or it failed.
    fn fit_normalisation(&mut self) -> Option<(f64, f64)> {
        let Some(NormState::Learning(l)) = &self.norm else {
            return None;
        };
        match l.freeze() {
            Ok(m) => {
                let f = m.fit();
                let baseline = (f.reference_approach, f.residual_sd);
                self.norm = Some(NormState::Ready(Box::new(m)));
                Some(baseline)
            }
            Err(err) => {
                self.norm = Some(NormState::Unavailable(err.to_string()));
                None
            }
        }
    }

    /// A front depth into its daily trend; the forecast again when a day has completed.
    fn front_sample(&mut self, s: &DriftSettings, e: &Evaluation) {
        let (Some(eol), Some(Ok(p))) = (s.front_end_of_life_m, &e.bed_profile) else {
            return;
        };
        let Ok(front) = p.front else { return };
        let days = self.front.len();
        self.front.push(
            e.sample_ts_ms.div_euclid(crate::units::DAY_MS),
            front.depth_m,
        );
        if self.front.len() != days {
            self.front_forecast = self.front.forecast(eol);
        }
    }

    /// Samples left out of the statistics so far.
    pub fn excluded(&self) -> u64 {
        self.excluded
    }

    pub fn offline(&self) -> bool {
        self.offline
    }

    /// The current drift figures without a new sample.
    pub fn figures(&self, s: &DriftSettings) -> DriftFigures {
        DriftFigures {
            excluded: None,
            learning: self.baseline.is_none(),
            baseline: self.baseline,
            ewma: self.last_ewma,
            cusum_k: self.cusum_last.map(|c| c.upper_k),
            cusum_lower_k: self.cusum_last.map(|c| c.lower_k),
            cusum_h_k: self.baseline.map(|b| s.cusum_h_sigma * b.sigma_k),
            cusum_reference_k: self.cusum.as_ref().map(Cusum::reference),
            cusum_signal: self.cusum_last.is_some_and(|c| c.shift.is_some()),
            step: self.step,
            step_min_k: self.step_min_k(s),
            standing_step_k: self.standing_step_k(),
            trend: self.trend,
            forecast: self.forecast.unwrap_or(if s.end_of_run_limit_k.is_none() {
                Forecast::NoLimit
            } else {
                Forecast::NoTrend
            }),
            limit_k: s.end_of_run_limit_k,
            front: self.front_forecast,
            front_days: self.front.len(),
            normalised: None,
        }
    }

    fn forecast(&self, s: &DriftSettings) -> Forecast {
        let Some(limit) = s.end_of_run_limit_k else {
            return Forecast::NoLimit;
        };
        let (Some(t), Some(start)) = (self.trend, self.run_start_ms) else {
            return Forecast::NoTrend;
        };
        if t.fitted_k >= limit {
            return Forecast::Reached;
        }
        let to_ms = |day: f64| start.saturating_add((day * DAY_MS) as i64);
        match t.fit.end_of_run(limit) {
            EndOfRun::NotRising => Forecast::NotRising,
            EndOfRun::At {
                day,
                earliest,
                latest,
            } => {
                let (lo, hi) = t.slope_interval_k_per_day;
                // Theil–Sen: the slope interval bounds the date as well (the band is an
                // approximation there); least squares: the prediction band.
                let (earliest, latest) = match t.method {
                    TrendMethod::LeastSquares => (earliest, latest),
                    TrendMethod::TheilSen => {
                        let last_day = (t.last_ms - start) as f64 / DAY_MS;
                        let reach = |m: f64| (m > 0.0).then(|| last_day + (limit - t.fitted_k) / m);
                        (reach(hi).unwrap_or(day).min(earliest), reach(lo))
                    }
                };
                Forecast::At {
                    at_ms: to_ms(day),
                    earliest_ms: to_ms(earliest),
                    latest_ms: latest.map(to_ms),
                }
            }
        }
    }

    /// The unit's pressure (bar abs) as it arrives: off line below the configured limit.
    pub fn pressure(&mut self, s: &WatchSettings, bar: f64, now_ms: i64) -> Vec<WatchEvent> {
        let Some(limit) = s.offline_below_bar else {
            return Vec::new();
        };
        if !bar.is_finite() {
            return Vec::new();
        }
        let mut out = Vec::new();
        if let Some(i) = self
            .watched
            .iter()
            .position(|w| w.figure == Source::Offline)
        {
            self.update_one(i, Some(bar), now_ms, &mut out);
        }
        let off = bar < limit;
        if off == self.offline {
            return out;
        }
        self.offline = off;
        if off {
            self.offline_since_ms = Some(now_ms);
        } else if let Some(since) = self.offline_since_ms.take() {
            self.paused_ms = self.paused_ms.saturating_add((now_ms - since).max(0));
        }
        self.apply_suppression(now_ms, &mut out);
        out
    }

    /// Takes one evaluation; returns the drift figures for the result and the events.
    pub fn observe(
        &mut self,
        s: &WatchSettings,
        e: &Evaluation,
        now_ms: i64,
    ) -> (DriftFigures, Vec<WatchEvent>) {
        let t = e.sample_ts_ms;
        self.started_ms.get_or_insert(t);
        let approach = e.reactions.first().and_then(|a| a.approach_k);
        let transient = e.reasons.iter().any(|r| r.code == ReasonCode::Transient);
        let excluded = if self.offline {
            Some(Exclusion::UnitOffline)
        } else if e.quality == Quality::Bad {
            Some(Exclusion::BadQuality)
        } else if transient {
            Some(Exclusion::Transient)
        } else if approach.is_none_or(|a| !a.is_finite()) {
            Some(Exclusion::NoApproach)
        } else {
            None
        };
        let mut out = Vec::new();
        // Suppression by design follows the analysis quality.
        let bad = (e.quality == Quality::Bad).then(|| {
            let mut codes: Vec<&str> = Vec::new();
            for r in e.reasons.iter().filter(|r| r.severity == Quality::Bad) {
                if !codes.contains(&r.code.as_str()) {
                    codes.push(r.code.as_str());
                }
            }
            format!("analysis bad: {}", codes.join(", "))
        });
        if bad != self.analysis_bad {
            self.analysis_bad = bad;
            self.apply_suppression(now_ms, &mut out);
        }
        if e.quality == Quality::Good {
            self.last_good_ms = Some(t.max(self.last_good_ms.unwrap_or(i64::MIN)));
            self.paused_ms = 0;
        }
        let (excluded, value, normalised) = self.normalise(&s.drift, e, excluded, approach);
        if let (None, Some(x)) = (excluded, value) {
            self.sample(&s.drift, t, x);
        } else {
            self.excluded += 1;
        }
        if !(self.offline || transient || e.quality == Quality::Bad) {
            self.front_sample(&s.drift, e);
        }
        let mut fig = self.figures(&s.drift);
        fig.excluded = excluded;
        fig.normalised = normalised.map(|mut n| {
            // The state after this sample (the fit may have been made by it).
            self.describe_norm(&mut n);
            n
        });
        // Feed the state machines.
        let usable = excluded.is_none();
        for i in 0..self.watched.len() {
            let v = match self.watched[i].figure {
                Source::Figure(Figure::Approach, k) => approach
                    .filter(|_| e.quality != Quality::Bad)
                    .map(|a| a * k),
                // On the analyser's basis: the ppm the analyser shows.
                Source::Figure(Figure::KeyMeasured, k) => e
                    .key_measured_on_basis
                    .filter(|_| e.quality != Quality::Bad)
                    .map(|a| a * k),
                Source::Trend => {
                    if !usable {
                        continue;
                    }
                    // Only a trend that rises beyond doubt (its 95 % slope interval clear
                    // of zero) counts: noise on a flat approach must not raise it.
                    Some(
                        fig.trend
                            .filter(|t| t.slope_interval_k_per_day.0 > 0.0)
                            .map_or(0.0, |t| t.slope_k_per_day),
                    )
                }
                Source::EndOfRun => {
                    if !usable {
                        continue;
                    }
                    // The same for the forecast: a date whose late bound is "never" (the
                    // slope interval reaches zero) is no end of run to warn of.
                    Some(match fig.forecast {
                        Forecast::At {
                            at_ms,
                            latest_ms: Some(_),
                            ..
                        } => (at_ms - t) as f64 / DAY_MS,
                        Forecast::Reached => 0.0,
                        _ => f64::MAX,
                    })
                }
                Source::Cusum => {
                    if !usable {
                        continue;
                    }
                    Some(fig.standing_step_k.unwrap_or(0.0))
                }
                Source::BedRise => e
                    .bed_rise
                    .and_then(|b| b.excess_k())
                    .filter(|_| e.quality != Quality::Bad && !self.offline),
                Source::GrossError => match &e.reconciliation {
                    Some(Ok(r)) if !self.offline && e.quality != Quality::Bad => r
                        .rec
                        .global
                        .filter(|g| g.critical > 0.0)
                        .map(|g| g.statistic / g.critical),
                    _ => None,
                },
                // Time-based ones are fed by `tick`; the off-line one by `pressure`.
                Source::DataQuality | Source::Chatter(_) | Source::Stale(_) | Source::Offline => {
                    continue;
                }
            };
            self.update_one(i, v, now_ms, &mut out);
        }
        self.timers(now_ms, &mut out);
        (fig, out)
    }

    /// Advances the timers (shelf expiry, data quality, chattering, stale) to `now_ms`.
    pub fn tick(&mut self, now_ms: i64) -> Vec<WatchEvent> {
        let mut out = Vec::new();
        for i in 0..self.watched.len() {
            let ev = self.watched[i].alarm.tick(now_ms);
            self.push_events(i, ev, &mut out);
        }
        self.timers(now_ms, &mut out);
        out
    }

    fn timers(&mut self, now_ms: i64, out: &mut Vec<WatchEvent>) {
        for i in 0..self.watched.len() {
            let v = match self.watched[i].figure {
                Source::DataQuality => {
                    let Some(since) = self.last_good_ms.or(self.started_ms) else {
                        continue;
                    };
                    // On-line time only: the time off line is taken out.
                    let off = self.offline_since_ms.map_or(0, |t| (now_ms - t).max(0));
                    let on_line = now_ms - since - self.paused_ms - off;
                    Some(on_line.max(0) as f64 / MINUTE_MS as f64)
                }
                Source::Chatter(j) => {
                    let w = &mut self.watched[j];
                    while w
                        .activations
                        .front()
                        .is_some_and(|&t| now_ms - t >= MINUTE_MS)
                    {
                        w.activations.pop_front();
                    }
                    Some(w.activations.len() as f64)
                }
                Source::Stale(j) => Some(
                    self.watched[j]
                        .active_since_ms
                        .map_or(0.0, |t| (now_ms - t).max(0) as f64 / 3_600_000.0),
                ),
                _ => continue,
            };
            if self.watched[i].value != v {
                self.update_one(i, v, now_ms, out);
            }
        }
    }

    fn update_one(&mut self, i: usize, v: Option<f64>, now_ms: i64, out: &mut Vec<WatchEvent>) {
        self.watched[i].value = v;
        let ev = self.watched[i].alarm.update(v, now_ms);
        self.push_events(i, ev, out);
    }

    fn push_events(&mut self, i: usize, ev: Vec<Event>, out: &mut Vec<WatchEvent>) {
        for event in ev {
            let w = &mut self.watched[i];
            match event.kind {
                EventKind::Raised | EventKind::Realarmed => {
                    w.activations.push_back(event.at_ms);
                    if w.active_since_ms.is_none() {
                        w.active_since_ms = Some(event.at_ms);
                    }
                }
                _ => {}
            }
            if !(w.alarm.condition() && w.alarm.annunciating()) {
                w.active_since_ms = None;
            }
            out.push(WatchEvent {
                class: w.class,
                index: i,
                event,
            });
        }
    }

    /// Enters or leaves suppression by design after the analysis or the unit changed.
    /// A trip or return is told once, by the `off-line` alert: the alarms enter and leave
    /// suppression silently (their states stay in the retained state); suppression for a
    /// bad analysis is an event per operator alarm.
    fn apply_suppression(&mut self, now_ms: i64, out: &mut Vec<WatchEvent>) {
        let has_offline_alert = self.watched.iter().any(|w| w.figure == Source::Offline);
        for i in 0..self.watched.len() {
            if self.watched[i].figure == Source::Offline {
                continue;
            }
            let silent = has_offline_alert
                && (self.offline
                    || matches!(self.watched[i].alarm.mode(),
                        super::alarm::Mode::SuppressedByDesign { reason } if reason == OFFLINE_REASON));
            let reason = if self.offline {
                Some(OFFLINE_REASON.to_string())
            } else if self.watched[i].class == Class::Alarm {
                self.analysis_bad.clone()
            } else {
                None
            };
            let a = &mut self.watched[i].alarm;
            let suppressed = matches!(a.mode(), super::alarm::Mode::SuppressedByDesign { .. });
            let ev = match (&reason, suppressed) {
                (Some(r), false) if *a.mode() == super::alarm::Mode::Active => {
                    a.suppress_by_design(r, now_ms).unwrap_or_default()
                }
                (None, true) => a.unsuppress(now_ms).unwrap_or_default(),
                _ => Vec::new(),
            };
            let ev = if silent {
                ev.into_iter()
                    .filter(|e| {
                        !matches!(
                            e.kind,
                            EventKind::Suppressed { .. } | EventKind::Unsuppressed
                        )
                    })
                    .collect()
            } else {
                ev
            };
            self.push_events(i, ev, out);
        }
    }

    fn sample(&mut self, s: &DriftSettings, t: i64, x: f64) {
        let start = *self.run_start_ms.get_or_insert(t);
        if self.baseline.is_none() {
            match s.baseline {
                BaselineSpec::Given {
                    approach_k,
                    sigma_k,
                } => self.set_baseline(s, approach_k, sigma_k, true, start),
                BaselineSpec::Learn { .. } => {
                    if !self.closes_baseline_window(s, t) {
                        // Welford's running mean and variance.
                        self.learn_n += 1;
                        let d = x - self.learn_mean;
                        self.learn_mean += d / self.learn_n as f64;
                        self.learn_m2 += d * (x - self.learn_mean);
                    } else {
                        let sd = if self.learn_n > 1 {
                            (self.learn_m2 / (self.learn_n - 1) as f64).sqrt()
                        } else {
                            0.0
                        };
                        let (mean, sd) = self.fit_normalisation().unwrap_or((self.learn_mean, sd));
                        self.set_baseline(s, mean, sd, false, start);
                    }
                }
            }
        }
        if let (Some(ewma), Some(cusum)) = (&mut self.ewma, &mut self.cusum) {
            self.last_ewma = Some(ewma.push(x));
            let point = cusum.push(x, t);
            self.cusum_last = Some(point);
            if let (Some(shift), Some(min)) = (point.shift, self.step_min_k(s)) {
                self.shifted(s, shift, t, min, start);
            }
        }
        // Steady-state aggregates of the run (the learning window included).
        let period = s.aggregate_ms.max(1);
        let k = (t - start).div_euclid(period);
        let bstart = start + k * period;
        let closed = match &mut self.bucket {
            Some(b) if b.start_ms == bstart => {
                b.n += 1;
                b.sum += x;
                None
            }
            slot => slot.replace(Bucket {
                start_ms: bstart,
                n: 1,
                sum: x,
            }),
        };
        if let Some(b) = closed {
            if b.n >= s.min_per_aggregate && b.start_ms < bstart {
                let mid = (b.start_ms - start) as f64 / DAY_MS + 0.5 * period as f64 / DAY_MS;
                self.aggregates.push((mid, b.sum / b.n as f64));
                self.refit(s, start);
            }
        }
    }

    /// The step size (K): configured, or h in K once the baseline is known.
    fn step_min_k(&self, s: &DriftSettings) -> Option<f64> {
        s.step_min_k
            .or_else(|| self.baseline.map(|b| s.cusum_h_sigma * b.sigma_k))
    }

    /// The present level (the CUSUM's reference, moved at each shift) minus the level
    /// before a standing upward step.
    fn standing_step_k(&self) -> Option<f64> {
        Some(self.cusum.as_ref()?.reference() - self.step_reference_k?)
    }

    /// A CUSUM shift: a step when the level moved by at least `min` within the step
    /// window; a step that continues the last one (same direction, within the window)
    /// extends it.
    fn shifted(&mut self, s: &DriftSettings, shift: Shift, t: i64, min: f64, start: i64) {
        let window = s.step_window_ms.max(0);
        self.recent_shifts.push_back((shift, t));
        while self
            .recent_shifts
            .front()
            .is_some_and(|(_, at)| t - at > window)
        {
            self.recent_shifts.pop_front();
        }
        // The level is back near where it stood before the upward step: no step stands.
        if self
            .step_reference_k
            .is_some_and(|r| shift.to_k - r < 0.25 * min)
        {
            self.step_reference_k = None;
        }
        let Some(&(oldest, _)) = self.recent_shifts.front() else {
            return;
        };
        let change = shift.to_k - oldest.from_k;
        if change.abs() < min {
            return;
        }
        let mut step = Shift {
            since_ms: oldest.since_ms,
            from_k: oldest.from_k,
            ..shift
        };
        if let Some(last) = self.step {
            let last_change = last.shift.to_k - last.shift.from_k;
            if t - last.detected_ms <= window && last_change.signum() == change.signum() {
                step.since_ms = last.shift.since_ms;
                step.from_k = last.shift.from_k;
            }
        }
        self.recent_shifts.clear();
        self.new_step(s, step, t, start);
    }

    /// A step: the trend and forecast start again from the change point, and the level
    /// before an upward step is kept until the level comes back down to it.
    fn new_step(&mut self, s: &DriftSettings, shift: Shift, t: i64, start: i64) {
        self.step = Some(Step {
            shift,
            detected_ms: t,
        });
        if shift.to_k > shift.from_k {
            self.step_reference_k.get_or_insert(shift.from_k);
        }
        self.refit(s, start);
    }

    fn set_baseline(&mut self, s: &DriftSettings, mean: f64, sd: f64, given: bool, start: i64) {
        let sigma = if given { sd } else { sd.max(s.sigma_floor_k) };
        self.baseline = Some(Baseline {
            approach_k: mean,
            sigma_k: sigma,
            given,
            since_ms: start,
        });
        self.ewma = Ewma::new(mean, sigma, s.ewma_lambda, s.ewma_l).ok();
        self.cusum = Cusum::new(mean, s.cusum_k_sigma * sigma, s.cusum_h_sigma * sigma).ok();
        if s.step_min_k.is_none() {
            let h = s.cusum_h_sigma * sigma;
            for w in &mut self.watched {
                if w.figure == Source::Cusum {
                    w.alarm.set_limit(h, 0.25 * h);
                }
            }
        }
    }

    fn refit(&mut self, s: &DriftSettings, start: i64) {
        let from = match s.trend_window_ms {
            Some(w) => {
                let last = self.aggregates.last().map_or(0.0, |a| a.0);
                let cut = last - w as f64 / DAY_MS;
                self.aggregates.partition_point(|a| a.0 < cut)
            }
            None => 0,
        };
        // Steps are not trends: only whole aggregates after the last step's change point.
        let half_period = 0.5 * s.aggregate_ms.max(1) as f64 / DAY_MS;
        let from = match self.step {
            Some(st) => {
                let cut = (st.shift.since_ms - start) as f64 / DAY_MS;
                from.max(self.aggregates.partition_point(|a| a.0 - half_period < cut))
            }
            None => from,
        };
        let pts = &self.aggregates[from..];
        if pts.len() < s.min_aggregates.max(3) {
            self.trend = None;
            self.forecast = None;
            return;
        }
        let fit = match s.trend {
            TrendMethod::LeastSquares => Trend::fit(pts),
            TrendMethod::TheilSen => Trend::fit_theil_sen(pts, &mut self.work),
        };
        self.trend = fit.map(|f| {
            let first = pts[0].0;
            let last = pts[pts.len() - 1].0;
            TrendFigures {
                method: s.trend,
                slope_k_per_day: f.slope_per_day,
                slope_interval_k_per_day: f.slope_interval,
                fitted_k: f.intercept + f.slope_per_day * last,
                band_k: f.band(last),
                points: pts.len(),
                origin_ms: start,
                intercept_k: f.intercept,
                first_ms: start + (first * DAY_MS) as i64,
                last_ms: start + (last * DAY_MS) as i64,
                fit: f,
            }
        });
        self.forecast = Some(self.forecast(s));
    }

    /// The run's learned state (baseline, statistics, aggregates).
    pub fn drift_snapshot(&self) -> DriftSnapshot {
        DriftSnapshot {
            run_start_ms: self.run_start_ms,
            learn_n: self.learn_n,
            learn_mean: self.learn_mean,
            learn_m2: self.learn_m2,
            baseline: self.baseline,
            ewma: self.ewma.as_ref().map(Ewma::state),
            cusum: self.cusum.as_ref().map(Cusum::state),
            step: self.step,
            step_reference_k: self.step_reference_k,
            bucket: self.bucket.as_ref().map(|b| (b.start_ms, b.n, b.sum)),
            aggregates: self.aggregates.clone(),
            front_daily: self.front.daily().collect(),
            norm: self.norm.clone(),
        }
    }

    /// Takes a saved run back (after a restart); the trend and forecast are refitted.
    /// Refuses a snapshot with non-finite numbers or aggregates out of order.
    pub fn restore_drift(&mut self, s: &DriftSettings, snap: &DriftSnapshot) -> bool {
        let finite = snap.learn_mean.is_finite()
            && snap.learn_m2.is_finite()
            && snap.baseline.is_none_or(|b| {
                b.approach_k.is_finite() && b.sigma_k.is_finite() && b.sigma_k > 0.0
            })
            && snap
                .aggregates
                .iter()
                .all(|a| a.0.is_finite() && a.1.is_finite())
            && snap.aggregates.windows(2).all(|w| w[0].0 < w[1].0)
            && snap.bucket.is_none_or(|b| b.2.is_finite());
        if !finite {
            return false;
        }
        self.rebaseline();
        self.run_start_ms = snap.run_start_ms;
        self.learn_n = snap.learn_n;
        self.learn_mean = snap.learn_mean;
        self.learn_m2 = snap.learn_m2;
        if let Some(b) = snap.baseline {
            self.set_baseline(s, b.approach_k, b.sigma_k, b.given, b.since_ms);
            // set_baseline floors a learned σ; the saved one was floored already.
            self.baseline = Some(b);
            if let (Some(e), Some((z, n))) = (self.ewma.as_mut(), snap.ewma) {
                e.set_state(z, n);
            }
            if let (Some(c), Some(v)) = (self.cusum.as_mut(), snap.cusum) {
                if !c.set_state(&v) {
                    return false;
                }
            }
        }
        self.step = snap.step;
        self.step_reference_k = snap.step_reference_k.filter(|r| r.is_finite());
        self.bucket = snap
            .bucket
            .map(|(start_ms, n, sum)| Bucket { start_ms, n, sum });
        self.aggregates = snap.aggregates.clone();
        self.front = crate::bedprofile::FrontTrend::from_daily(snap.front_daily.iter().copied());
        self.front_forecast = s
            .front_end_of_life_m
            .and_then(|eol| self.front.forecast(eol));
        // A normalisation saved under other context inputs is not used (the settings
        // text check starts a new run in that case anyway).
        self.norm = snap.norm.clone().filter(|n| match (n, &s.normalise) {
            (NormState::Learning(l), Some(spec)) => l.config() == &spec.config,
            (NormState::Ready(m), Some(spec)) => m.config() == &spec.config,
            (NormState::Unavailable(_), Some(_)) => true,
            (_, None) => false,
        });
        if let Some(start) = self.run_start_ms {
            self.refit(s, start);
        }
        true
    }

    /// Per alert and alarm: id, its configuration as text (to notice a change), its state.
    pub fn alarm_snapshots(&self) -> Vec<(String, String, super::alarm::AlarmSnapshot)> {
        self.watched
            .iter()
            .map(|w| {
                (
                    w.alarm.config().id.clone(),
                    format!("{:?}", w.alarm.config()),
                    w.alarm.snapshot(),
                )
            })
            .collect()
    }

    /// Takes back a saved alarm state if the id exists with the same configuration.
    pub fn restore_alarm(
        &mut self,
        id: &str,
        config: &str,
        snap: &super::alarm::AlarmSnapshot,
    ) -> bool {
        let Some(w) = self.watched.iter_mut().find(|w| w.alarm.config().id == id) else {
            return false;
        };
        // Suppression by design is re-derived from the next data, never carried over.
        let mut snap = snap.clone();
        if matches!(snap.mode, super::alarm::Mode::SuppressedByDesign { .. }) {
            snap.mode = super::alarm::Mode::Active;
        }
        if format!("{:?}", w.alarm.config()) != config || !w.alarm.restore(&snap) {
            return false;
        }
        if w.alarm.condition() && w.alarm.annunciating() {
            w.active_since_ms = w.alarm.last_annunciated_ms();
        }
        true
    }

    /// Starts a new run from `now_ms` (catalyst change, reduction, regeneration).
    fn rebaseline(&mut self) {
        self.run_start_ms = None;
        self.learn_n = 0;
        self.learn_mean = 0.0;
        self.learn_m2 = 0.0;
        self.baseline = None;
        self.ewma = None;
        self.last_ewma = None;
        self.cusum = None;
        self.cusum_last = None;
        self.step = None;
        self.step_reference_k = None;
        self.recent_shifts.clear();
        self.bucket = None;
        self.aggregates.clear();
        self.trend = None;
        self.forecast = None;
        self.front.clear();
        self.front_forecast = None;
        self.norm = None;
    }

    /// Carries out a command from `by`; returns a message for the outcome and the events.
    pub fn command(
        &mut self,
        s: &WatchSettings,
        action: &Action,
        alarm: Option<&str>,
        by: &str,
        now_ms: i64,
    ) -> Result<(String, Vec<WatchEvent>), CommandError> {
        let mut out = Vec::new();
        if let Action::Rebaseline { reason } = action {
            if by.trim().is_empty() || reason.trim().is_empty() {
                return Err(AlarmError::Empty("user and reason").into());
            }
            self.rebaseline();
            // Drift alerts return to "nothing to report" until the new run has a trend.
            let neutral = self.figures(&s.drift);
            for i in 0..self.watched.len() {
                let v = match self.watched[i].figure {
                    Source::Trend => Some(neutral.trend.map_or(0.0, |t| t.slope_k_per_day)),
                    Source::EndOfRun => Some(f64::MAX),
                    Source::Cusum => Some(0.0),
                    _ => continue,
                };
                self.update_one(i, v, now_ms, &mut out);
            }
            return Ok((
                format!("new run from now ({reason}): baseline is being learned again"),
                out,
            ));
        }
        let id = alarm.ok_or(CommandError::NeedsAlarm(action.as_str()))?;
        let Some(i) = self
            .watched
            .iter()
            .position(|w| w.alarm.config().id.eq_ignore_ascii_case(id))
        else {
            let known: Vec<&str> = self
                .watched
                .iter()
                .map(|w| w.alarm.config().id.as_str())
                .collect();
            return Err(CommandError::UnknownAlarm(id.into(), known.join(", ")));
        };
        let a = &mut self.watched[i].alarm;
        let ev = match action {
            Action::Acknowledge => a.acknowledge(by, now_ms)?,
            Action::Shelve {
                duration_ms,
                reason,
            } => a.shelve(by, reason, *duration_ms, now_ms)?,
            Action::Unshelve => a.unshelve(by, now_ms)?,
            Action::OutOfService { reason } => a.remove_from_service(by, reason, now_ms)?,
            Action::ReturnToService => a.return_to_service(by, now_ms)?,
            Action::ResetLatch => a.reset_latch(by, now_ms)?,
            Action::Rebaseline { .. } => Vec::new(),
        };
        let id = a.config().id.clone();
        let state = a.state().as_str();
        let mode = a.mode().as_str();
        self.push_events(i, ev, &mut out);
        Ok((
            format!("{} {id}: now {state}, {mode}", action.as_str()),
            out,
        ))
    }

    /// The run's start (ms) and its closed steady-state aggregates (day since the run
    /// start, mean approach K): what the trend is fitted on (read-only, for plots).
    pub fn aggregates(&self) -> (Option<i64>, &[(f64, f64)]) {
        (self.run_start_ms, &self.aggregates)
    }
}

/// Plant-wide self-monitoring: operator alarm activations in the last 10 minutes and
/// floods (more than 10 in 10 minutes), itself an alert.
#[derive(Debug, Clone)]
pub struct PlantWatch {
    activations: VecDeque<i64>,
    pub flood: Alarm,
    pub floods: u64,
}

const TEN_MIN_MS: i64 = 600_000;

impl Default for PlantWatch {
    fn default() -> Self {
        Self::new()
    }
}

impl PlantWatch {
    pub fn new() -> Self {
        let flood = Alarm::new(alert_config("flood", 10.5, Direction::High, 3.0))
            .unwrap_or_else(|_| unreachable!("fixed flood configuration is valid"));
        Self {
            activations: VecDeque::new(),
            flood,
            floods: 0,
        }
    }

    /// Operator alarm activations in the last 10 minutes at `now_ms`.
    pub fn rate(&self) -> usize {
        self.activations.len()
    }

    /// Counts the alarm activations among `events` and updates the flood alert.
    pub fn observe(&mut self, events: &[WatchEvent], now_ms: i64) -> Vec<Event> {
        for e in events {
            if e.class == Class::Alarm
                && matches!(e.event.kind, EventKind::Raised | EventKind::Realarmed)
            {
                self.activations.push_back(e.event.at_ms);
            }
        }
        self.tick(now_ms)
    }

    pub fn tick(&mut self, now_ms: i64) -> Vec<Event> {
        while self
            .activations
            .front()
            .is_some_and(|&t| now_ms - t >= TEN_MIN_MS)
        {
            self.activations.pop_front();
        }
        let ev = self
            .flood
            .update(Some(self.activations.len() as f64), now_ms);
        self.floods += ev.iter().filter(|e| e.kind == EventKind::Raised).count() as u64;
        ev
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::approach::{Approach, Direction as Dir, Flags};
    use crate::monitor::Reason;
    use crate::monitor::alarm::{Mode, State};

    const H: i64 = 3_600_000;
    const D: i64 = 86_400_000;

    fn eval(
        t: i64,
        approach: Option<f64>,
        quality: Quality,
        code: Option<ReasonCode>,
    ) -> Evaluation {
        let a = Approach {
            ln_k: 0.0,
            delta_g_j_per_mol: 0.0,
            delta_h_j_per_mol: 0.0,
            delta_s_j_per_mol_k: 0.0,
            ln_q: 0.0,
            q_over_k: 1.0,
            affinity_j_per_mol: 0.0,
            direction: Dir::AtEquilibrium,
            endothermic: false,
            equilibrium_temperature_k: None,
            approach_k: approach,
            approach_uncertainty_k: None,
            uncertainty_budget_k: None,
            ln_q_uncertainty: 0.0,
            flags: Flags::default(),
        };
        Evaluation {
            analysis_ts_ms: t,
            sample_ts_ms: t,
            quality,
            reasons: code
                .map(|c| Reason {
                    code: c,
                    severity: quality,
                    message: String::new(),
                })
                .into_iter()
                .collect(),
            temperature_k: None,
            temperature_spread_k: None,
            pressure_bar: None,
            steam_ratio: None,
            inputs: Vec::new(),
            mole_fractions: Vec::new(),
            fugacity_coefficients: Vec::new(),
            compressibility_factor: None,
            reactions: vec![a],
            equilibrium_mole_fractions: Vec::new(),
            key_measured: Some(5e-6),
            key_equilibrium: None,
            key_measured_on_basis: Some(5e-6),
            approach_not_meaningful: false,
            bed_rise: None,
            bed_profile: None,
            flows: Vec::new(),
            context: Vec::new(),
            reconciliation: None,
        }
    }

    fn alarm_spec(id: &str, limit: f64, on_samples: u32) -> AlarmSpec {
        AlarmSpec {
            config: AlarmConfig {
                id: id.into(),
                limit,
                direction: Direction::High,
                deadband: 1.0,
                on_delay_ms: 0,
                off_delay_ms: 0,
                on_delay_samples: on_samples,
                off_delay_samples: 0,
                realarm_ms: None,
                latched: false,
                priority: Priority::P2,
                max_shelve_ms: 8 * H,
            },
            figure: Figure::Approach,
            scale: 1.0,
            unit: "K",
            rationale: "invented for the test".into(),
        }
    }

    fn kinds(ev: &[WatchEvent], w: &ReactorWatch) -> Vec<(String, EventKind)> {
        ev.iter()
            .map(|e| {
                (
                    w.watched[e.index].alarm.config().id.clone(),
                    e.event.kind.clone(),
                )
            })
            .collect()
    }

    /// Settings for the normalised statistics on one context input (throughput).
    fn normalised_settings() -> WatchSettings {
        WatchSettings {
            drift: DriftSettings {
                baseline: BaselineSpec::Learn {
                    window_ms: 2 * D,
                    min_samples: 20,
                },
                normalise: Some(NormaliseSpec {
                    inputs: vec![ContextInput::Throughput],
                    config: crate::normalise::Config::new(vec![crate::normalise::Input::new(
                        "throughput",
                        "kmol/h",
                    )]),
                }),
                ..DriftSettings::default()
            },
            ..WatchSettings::default()
        }
    }

    #[test]
    fn normalised_statistics_learn_the_throughput_response_and_refuse_to_extrapolate() {
        // Invented: approach = 8 K + 0.004 K per kmol/h above 2400 kmol/h, exactly; the
        // throughput swings 2300–2500 kmol/h over the 2-day learning window (hourly).
        let s = normalised_settings();
        let mut w = ReactorWatch::new(&s).unwrap();
        let truth = |f: f64| 8.0 + 0.004 * (f - 2400.0);
        let flow = |h: i64| 2400.0 + 100.0 * ((h as f64) * 0.7).sin();
        let mut fig = None;
        for h in 0..48 {
            let t = h * H;
            let mut e = eval(t, Some(truth(flow(h))), Quality::Good, None);
            e.context = vec![Some(flow(h))];
            fig = Some(w.observe(&s, &e, t).0);
        }
        let n = fig.unwrap().normalised.unwrap();
        assert_eq!(n.state, "learning");
        // The first sample after the window fits the regression: slope 0.004 exactly
        // (no noise), the baseline is the reference approach with σ at its floor.
        let t = 48 * H;
        let mut e = eval(t, Some(truth(2450.0) + 0.5), Quality::Good, None);
        e.context = vec![Some(2450.0)];
        let (fig, _) = w.observe(&s, &e, t);
        let n = fig.normalised.clone().unwrap();
        assert_eq!(n.state, "ready");
        let fit = n.fit.unwrap();
        assert!((fit.coefficients[0].value - 0.004).abs() < 1e-9, "{fit:?}");
        let b = fig.baseline.unwrap();
        assert!((b.approach_k - fit.reference_approach).abs() < 1e-12);
        assert_eq!(b.sigma_k, DriftSettings::default().sigma_floor_k);
        // After the fit, the statistics take the normalised approach: +0.5 K above what
        // 2450 kmol/h explains is +0.5 K above the reference, whatever the throughput.
        let t = 50 * H;
        let mut e = eval(t, Some(truth(2350.0) + 0.5), Quality::Good, None);
        e.context = vec![Some(2350.0)];
        let (fig, _) = w.observe(&s, &e, t);
        let x = fig.normalised.as_ref().unwrap().sample.unwrap();
        assert!((x.residual - 0.5).abs() < 1e-9);
        assert!((x.normalised - (fit.reference_approach + 0.5)).abs() < 1e-9);
        assert_eq!(fig.excluded, None);
        // A rate cut to 2000 kmol/h lies far outside 2300–2500: no normalised figure, the
        // sample stays out of the statistics and the refusal names the input.
        let t = 51 * H;
        let mut e = eval(t, Some(truth(2000.0)), Quality::Good, None);
        e.context = vec![Some(2000.0)];
        let (fig, _) = w.observe(&s, &e, t);
        assert_eq!(fig.excluded, Some(Exclusion::OutsideLearnedRange));
        let refused = fig.normalised.unwrap().refused.unwrap();
        assert!(refused.contains("throughput"), "{refused}");
        // A missing throughput: left out, saying which input is missing.
        let t = 52 * H;
        let mut e = eval(t, Some(8.0), Quality::Good, None);
        e.context = vec![None];
        let (fig, _) = w.observe(&s, &e, t);
        assert_eq!(fig.excluded, Some(Exclusion::NoContext));
        assert!(
            fig.normalised
                .unwrap()
                .refused
                .unwrap()
                .contains("throughput")
        );
        // The saved run carries the fitted regression; restored, it normalises the same.
        let snap = w.drift_snapshot();
        let mut again = ReactorWatch::new(&s).unwrap();
        assert!(again.restore_drift(&s.drift, &snap));
        let t = 53 * H;
        let mut e = eval(t, Some(truth(2350.0) + 0.5), Quality::Good, None);
        e.context = vec![Some(2350.0)];
        let (fig, _) = again.observe(&s, &e, t);
        let y = fig.normalised.unwrap().sample.unwrap();
        assert!((y.normalised - x.normalised).abs() < 1e-9);
    }

    #[test]
    fn a_failed_normalisation_falls_back_to_the_raw_approach_and_says_why() {
        // Invented: the throughput never moves in the learning window, so the regression
        // has no spread to learn from; the statistics run on the raw approach.
        let s = normalised_settings();
        let mut w = ReactorWatch::new(&s).unwrap();
        let mut last = None;
        for h in 0..=49 {
            let t = h * H;
            let mut e = eval(t, Some(8.0 + 0.01 * (h % 3) as f64), Quality::Good, None);
            e.context = vec![Some(2400.0)];
            last = Some(w.observe(&s, &e, t).0);
        }
        let fig = last.unwrap();
        let n = fig.normalised.unwrap();
        assert_eq!(n.state, "unavailable");
        assert!(n.unavailable_because.unwrap().contains("throughput"));
        assert!((fig.baseline.unwrap().approach_k - 8.01).abs() < 0.01);
        assert_eq!(fig.excluded, None);
    }

    #[test]
    fn daily_aggregates_give_the_domain_trend_and_end_of_run() {
        // docs/domain.md §7 [derived]: aggregates on days 0, 30, ..., 180 with approach 5.0 ... 8.4
        // → slope 0.018929 K/day, intercept 5.010714, 20 K at day 791.89. Here each
        // aggregate is 12 hourly samples of that value in a 1-day period whose middle
        // falls on the docs/domain.md §7 day + 0.5; the date shifts by half a day accordingly.
        let s = WatchSettings {
            drift: DriftSettings {
                baseline: BaselineSpec::Given {
                    approach_k: 5.0,
                    sigma_k: 0.3,
                },
                end_of_run_limit_k: Some(20.0),
                min_aggregates: 5,
                ..DriftSettings::default()
            },
            ..WatchSettings::default()
        };
        let mut w = ReactorWatch::new(&s).unwrap();
        let days = [0, 30, 60, 90, 120, 150, 180, 210];
        let vals = [5.0, 5.6, 6.1, 6.8, 7.2, 7.9, 8.4, 8.4];
        let mut last = None;
        for (d, v) in days.iter().zip(vals) {
            for h in 0..12 {
                let t = d * D + h * H;
                let (fig, _) = w.observe(&s, &eval(t, Some(v), Quality::Good, None), t);
                last = Some(fig);
            }
        }
        // The day-210 bucket is still open: the fit holds the seven docs/domain.md §7 points.
        let fig = last.unwrap();
        let tr = fig.trend.unwrap();
        assert_eq!(tr.points, 7);
        assert!((tr.slope_k_per_day - 0.018_929).abs() < 5e-7, "{tr:?}");
        assert!((tr.intercept_k - (5.010_714 - 0.018_929 * 0.5)).abs() < 1e-4);
        match fig.forecast {
            Forecast::At {
                at_ms,
                earliest_ms,
                latest_ms,
            } => {
                let day = at_ms as f64 / D as f64;
                assert!((day - 792.39).abs() < 0.02, "{day}");
                assert!(earliest_ms < at_ms && latest_ms.is_none_or(|l| l > at_ms));
            }
            f => panic!("{f:?}"),
        }
        assert_eq!(fig.baseline.unwrap().approach_k, 5.0);
    }

    #[test]
    fn baseline_is_learned_and_bad_or_transient_samples_stay_out() {
        // Invented samples: 30 at 8.0 ± 0.1 over the 7-day window, then a bad and a
        // transient sample far off, then in-control samples.
        let s = WatchSettings {
            drift: DriftSettings {
                baseline: BaselineSpec::Learn {
                    window_ms: 7 * D,
                    min_samples: 20,
                },
                ..DriftSettings::default()
            },
            ..WatchSettings::default()
        };
        let mut w = ReactorWatch::new(&s).unwrap();
        for i in 0..30 {
            let t = i * 6 * H;
            let v = if i % 2 == 0 { 7.9 } else { 8.1 };
            let (fig, _) = w.observe(&s, &eval(t, Some(v), Quality::Good, None), t);
            assert!(fig.learning || t >= 7 * D);
        }
        let t = 31 * 6 * H;
        let (fig, _) = w.observe(&s, &eval(t, Some(8.0), Quality::Good, None), t);
        let b = fig.baseline.unwrap();
        // 28 samples in the window (days 0–6.75): mean 8.0; σ ≈ 0.1 but floored at 0.2.
        assert!((b.approach_k - 8.0).abs() < 1e-9, "{b:?}");
        assert_eq!(b.sigma_k, 0.2);
        let (fig, _) = w.observe(
            &s,
            &eval(
                t + H,
                Some(40.0),
                Quality::Bad,
                Some(ReasonCode::StaleAnalysis),
            ),
            t + H,
        );
        assert_eq!(fig.excluded, Some(Exclusion::BadQuality));
        let (fig, _) = w.observe(
            &s,
            &eval(
                t + 2 * H,
                Some(40.0),
                Quality::Uncertain,
                Some(ReasonCode::Transient),
            ),
            t + 2 * H,
        );
        assert_eq!(fig.excluded, Some(Exclusion::Transient));
        assert_eq!(fig.cusum_k, Some(0.0));
        assert_eq!(w.excluded(), 2);
        // A sustained rise of 2σ + k signals the CUSUM after h/(x − μ0 − k) samples:
        // (8.6 − 8.0 − 0.1) = 0.5 per sample, h = 1.0 → signal at the third [Page 1954];
        // the scheme then restarts against the new level, so the fourth does not signal.
        let mut signals = Vec::new();
        for i in 0..4 {
            let t = t + (3 + i) * H;
            let (fig, _) = w.observe(&s, &eval(t, Some(8.6), Quality::Good, None), t);
            signals.push(fig.cusum_signal);
        }
        assert_eq!(signals, [false, false, true, false]);
    }

    #[test]
    fn operator_alarm_suppressed_while_analysis_bad_and_commands() {
        let s = WatchSettings {
            alarms: vec![alarm_spec("approach-high", 20.0, 2)],
            ..WatchSettings::default()
        };
        let mut w = ReactorWatch::new(&s).unwrap();
        let t0 = 1_000 * D;
        let (_, ev) = w.observe(&s, &eval(t0, Some(25.0), Quality::Good, None), t0);
        assert!(ev.is_empty(), "on-delay of 2 samples");
        let (_, ev) = w.observe(
            &s,
            &eval(t0 + 300_000, Some(25.0), Quality::Good, None),
            t0 + 300_000,
        );
        assert_eq!(
            kinds(&ev, &w),
            [("approach-high".to_string(), EventKind::Raised)]
        );
        // Bad analysis: suppressed by design, state still visible.
        let (_, ev) = w.observe(
            &s,
            &eval(
                t0 + 600_000,
                None,
                Quality::Bad,
                Some(ReasonCode::SourceBad),
            ),
            t0 + 600_000,
        );
        assert!(
            matches!(ev[0].event.kind, EventKind::Suppressed { .. }),
            "{ev:?}"
        );
        assert!(!w.watched[0].alarm.annunciating());
        // Acknowledge is refused while suppressed.
        let r = w.command(
            &s,
            &Action::Acknowledge,
            Some("approach-high"),
            "op1",
            t0 + 700_000,
        );
        assert!(matches!(
            r,
            Err(CommandError::Refused(AlarmError::NotActive(_)))
        ));
        let (_, ev) = w.observe(
            &s,
            &eval(t0 + 900_000, Some(25.0), Quality::Good, None),
            t0 + 900_000,
        );
        let k = kinds(&ev, &w);
        assert!(
            k.contains(&("approach-high".into(), EventKind::Unsuppressed)),
            "{k:?}"
        );
        // Raised before the suppression and still on: not raised a second time.
        assert!(
            !k.contains(&("approach-high".into(), EventKind::Raised)),
            "{k:?}"
        );
        assert_eq!(w.watched[0].alarm.state(), State::Unacknowledged);
        let (msg, ev) = w
            .command(
                &s,
                &Action::Acknowledge,
                Some("APPROACH-HIGH"),
                "op1",
                t0 + 960_000,
            )
            .unwrap();
        assert!(msg.contains("acknowledged"), "{msg}");
        assert_eq!(ev.len(), 1);
        // Shelve for 1 h: auto-unshelve at the first tick after expiry.
        let shelve = Action::Shelve {
            duration_ms: H,
            reason: "analyser maintenance".into(),
        };
        w.command(&s, &shelve, Some("approach-high"), "op1", t0 + D / 24)
            .unwrap();
        assert!(w.tick(t0 + D / 24 + H - 1).is_empty());
        let ev = w.tick(t0 + D / 24 + H);
        assert!(
            matches!(ev[0].event.kind, EventKind::Unshelved { auto: true, .. }),
            "{ev:?}"
        );
        // Unknown alarm and a missing id are refused with what is known.
        let e = w
            .command(&s, &Action::Acknowledge, Some("nope"), "op1", t0 + 2 * D)
            .unwrap_err();
        assert!(e.to_string().contains("approach-high"), "{e}");
        assert!(
            w.command(&s, &Action::Unshelve, None, "op1", t0 + 2 * D)
                .is_err()
        );
    }

    #[test]
    fn chattering_stale_and_flood_alerts() {
        // Common practice (docs/domain.md §6): chattering = 3 activations in a minute; stale = 24 h;
        // flood = more than 10 alarm activations in 10 minutes.
        let s = WatchSettings {
            alarms: vec![alarm_spec("approach-high", 20.0, 0)],
            ..WatchSettings::default()
        };
        let mut w = ReactorWatch::new(&s).unwrap();
        let mut plant = PlantWatch::new();
        let t0 = 1_000 * D;
        let mut all = Vec::new();
        for i in 0..6 {
            let t = t0 + i * 10_000;
            let v = if i % 2 == 0 { 25.0 } else { 10.0 };
            let (_, ev) = w.observe(&s, &eval(t, Some(v), Quality::Good, None), t);
            plant.observe(&ev, t);
            all.extend(kinds(&ev, &w));
        }
        assert!(
            all.contains(&("chattering:approach-high".into(), EventKind::Raised)),
            "{all:?}"
        );
        assert_eq!(plant.rate(), 3);
        let ev = w.tick(t0 + 10 * 60_000);
        assert!(kinds(&ev, &w).contains(&("chattering:approach-high".into(), EventKind::Cleared)));
        // Stays active (acknowledged) for a day: stale.
        let (_, _) = w.observe(
            &s,
            &eval(t0 + 11 * 60_000, Some(25.0), Quality::Good, None),
            t0 + 11 * 60_000,
        );
        w.command(
            &s,
            &Action::Acknowledge,
            Some("approach-high"),
            "op1",
            t0 + 12 * 60_000,
        )
        .unwrap();
        let ev = w.tick(t0 + 11 * 60_000 + 24 * H + 1);
        assert!(
            kinds(&ev, &w).contains(&("stale:approach-high".into(), EventKind::Raised)),
            "{:?}",
            kinds(&ev, &w)
        );
        // Eleven activations within ten minutes make a flood.
        let fake = |i: i64| WatchEvent {
            class: Class::Alarm,
            index: 0,
            event: Event {
                id: format!("x#{i}"),
                seq: i as u64,
                at_ms: t0 + D * 3 + i * 30_000,
                kind: EventKind::Raised,
            },
        };
        let mut raised = 0;
        for i in 0..11 {
            let e = fake(i);
            let at = e.event.at_ms;
            raised += plant
                .observe(&[e], at)
                .iter()
                .filter(|e| e.kind == EventKind::Raised)
                .count();
        }
        assert_eq!(raised, 1);
        assert_eq!(plant.floods, 1);
    }

    #[test]
    fn noise_on_a_flat_approach_raises_no_trend_or_end_of_run_alert() {
        // 60 days of a flat 8 K approach with ±5 K of hourly noise (invented: a fixed-seed
        // uniform generator, σ = 10/√12 ≈ 2.9 K, a noisy analyser). Daily means wander by
        // ~0.6 K, so a fit over the first week has a slope of ±0.1 K/d by chance: above the
        // 0.05 K/d trend limit and, towards 20 K, an end of run within a year. Neither is
        // real; both alerts must wait for a slope whose 95 % interval is clear of zero.
        let s = WatchSettings {
            drift: DriftSettings {
                baseline: BaselineSpec::Given {
                    approach_k: 8.0,
                    sigma_k: 2.9,
                },
                end_of_run_limit_k: Some(20.0),
                ..DriftSettings::default()
            },
            alerts: AlertSettings {
                trend_above_k_per_day: Some(0.05),
                end_of_run_within_days: Some(365.0),
                cusum: false,
                data_quality_after_ms: None,
                self_monitoring: false,
                bed_rise_excess_k: None,
                gross_error_samples: None,
            },
            alarms: Vec::new(),
            offline_below_bar: None,
        };
        let mut w = ReactorWatch::new(&s).unwrap();
        let mut seed: u64 = 0x2545_f491_4f6c_dd1d;
        let mut uniform = move || {
            // xorshift64 (G. Marsaglia, J. Stat. Softw. 8(14), 2003), mapped to [−1, 1).
            seed ^= seed << 13;
            seed ^= seed >> 7;
            seed ^= seed << 17;
            (seed >> 11) as f64 / (1u64 << 52) as f64 - 1.0
        };
        let t0 = 500 * D;
        let mut raised = Vec::new();
        let mut slopes = Vec::new();
        for h in 0..(60 * 24) {
            let t = t0 + h * H;
            let v = 8.0 + 5.0 * uniform();
            let (fig, ev) = w.observe(&s, &eval(t, Some(v), Quality::Good, None), t);
            if let Some(tr) = fig.trend {
                slopes.push(tr.slope_k_per_day);
            }
            raised.extend(
                kinds(&ev, &w)
                    .into_iter()
                    .filter(|k| k.1 == EventKind::Raised)
                    .map(|k| k.0),
            );
        }
        // The premise: chance slopes did pass the trend limit at some point.
        let max = slopes.iter().fold(f64::MIN, |a, &b| a.max(b));
        assert!(max > 0.05, "no chance slope above the limit: {max}");
        assert!(raised.is_empty(), "{raised:?}");
    }

    #[test]
    fn offline_unit_suppresses_and_rebaseline_restarts_the_run() {
        let s = WatchSettings {
            drift: DriftSettings {
                baseline: BaselineSpec::Given {
                    approach_k: 8.0,
                    sigma_k: 0.5,
                },
                end_of_run_limit_k: Some(20.0),
                ..DriftSettings::default()
            },
            alerts: AlertSettings {
                trend_above_k_per_day: Some(0.05),
                end_of_run_within_days: Some(90.0),
                cusum: true,
                data_quality_after_ms: Some(30 * MINUTE_MS),
                self_monitoring: false,
                bed_rise_excess_k: None,
                gross_error_samples: None,
            },
            alarms: vec![alarm_spec("approach-high", 20.0, 0)],
            offline_below_bar: Some(5.0),
        };
        let mut w = ReactorWatch::new(&s).unwrap();
        let t0 = 500 * D;
        // 40 days rising 0.2 K/d, hourly samples: trend, CUSUM and end-of-run alerts.
        let mut ids = Vec::new();
        for h in 0..(40 * 24) {
            let t = t0 + h * H;
            let v = 8.0 + 0.2 * h as f64 / 24.0;
            let (_, ev) = w.observe(&s, &eval(t, Some(v), Quality::Good, None), t);
            ids.extend(
                kinds(&ev, &w)
                    .into_iter()
                    .filter(|k| k.1 == EventKind::Raised)
                    .map(|k| k.0),
            );
        }
        assert!(ids.contains(&"trend".to_string()), "{ids:?}");
        // A steady rise is a trend, not a step: the level-shift alert stays quiet.
        assert!(!ids.contains(&"cusum".to_string()), "{ids:?}");
        assert!(ids.contains(&"end-of-run".to_string()), "{ids:?}");
        // No good result for 31 min: data-quality alert.
        let t1 = t0 + 40 * D;
        let ev = w.tick(t1 + 31 * MINUTE_MS);
        assert!(kinds(&ev, &w).contains(&("data-quality".into(), EventKind::Raised)));
        // Unit off line: one off-line alert; everything else suppressed by design
        // silently (the states stay in the retained list); samples excluded.
        let ev = w.pressure(&s, 1.2, t1 + 32 * MINUTE_MS);
        assert_eq!(
            kinds(&ev, &w),
            [("off-line".to_string(), EventKind::Raised)]
        );
        assert!(w.watched.iter().all(|x| x.alarm.config().id == "off-line"
            || matches!(x.alarm.mode(), Mode::SuppressedByDesign { .. })));
        let (fig, _) = w.observe(&s, &eval(t1 + H, Some(30.0), Quality::Good, None), t1 + H);
        assert_eq!(fig.excluded, Some(Exclusion::UnitOffline));
        w.pressure(&s, 30.0, t1 + 2 * H);
        // Re-baseline: drift alerts clear, learning starts afresh.
        let (msg, ev) = w
            .command(
                &s,
                &Action::Rebaseline {
                    reason: "catalyst replaced".into(),
                },
                None,
                "eng1",
                t1 + 3 * H,
            )
            .unwrap();
        assert!(msg.contains("catalyst replaced"));
        let cleared: Vec<String> = kinds(&ev, &w)
            .into_iter()
            .filter(|k| k.1 == EventKind::Cleared)
            .map(|k| k.0)
            .collect();
        assert!(
            cleared.contains(&"trend".to_string()) && cleared.contains(&"end-of-run".to_string()),
            "{cleared:?}"
        );
        let f = w.figures(&s.drift);
        assert!(f.trend.is_none() && matches!(f.forecast, Forecast::NoTrend));
    }

    #[test]
    fn a_saved_run_carries_over_a_restart() {
        // Invented samples: 20 days rising 0.1 K/d with a daily wobble; save after 12 days,
        // restore into a fresh watch, and both must give identical figures afterwards.
        let s = WatchSettings {
            drift: DriftSettings {
                baseline: BaselineSpec::Learn {
                    window_ms: 3 * D,
                    min_samples: 5,
                },
                end_of_run_limit_k: Some(20.0),
                ..DriftSettings::default()
            },
            ..WatchSettings::default()
        };
        let v = |h: i64| {
            8.0 + 0.1 * h as f64 / 24.0
                + 0.2 * ((h % 24) as f64 / 24.0 * std::f64::consts::TAU).sin()
        };
        let mut a = ReactorWatch::new(&s).unwrap();
        for h in 0..(12 * 24) {
            a.observe(&s, &eval(h * H, Some(v(h)), Quality::Good, None), h * H);
        }
        let snap = a.drift_snapshot();
        assert!(snap.baseline.is_some() && snap.aggregates.len() >= 11);
        let mut b = ReactorWatch::new(&s).unwrap();
        assert!(b.restore_drift(&s.drift, &snap));
        assert_eq!(b.drift_snapshot(), snap);
        for h in (12 * 24)..(20 * 24) {
            let (fa, _) = a.observe(&s, &eval(h * H, Some(v(h)), Quality::Good, None), h * H);
            let (fb, _) = b.observe(&s, &eval(h * H, Some(v(h)), Quality::Good, None), h * H);
            assert_eq!(fa, fb, "hour {h}");
        }
        // A damaged snapshot is refused and leaves the watch as it was.
        let mut bad = snap.clone();
        bad.aggregates.push((f64::NAN, 1.0));
        let before = b.drift_snapshot();
        assert!(!b.restore_drift(&s.drift, &bad));
        assert_eq!(b.drift_snapshot(), before);
    }

    /// Noise for invented series: a fixed pseudo-random sequence in [−a, a].
    fn wobble(i: i64, a: f64) -> f64 {
        let x = ((i as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15) >> 11) as f64 / (1u64 << 53) as f64;
        a * (2.0 * x - 1.0)
    }

    fn step_settings() -> WatchSettings {
        WatchSettings {
            drift: DriftSettings {
                baseline: BaselineSpec::Given {
                    approach_k: 8.0,
                    sigma_k: 0.5,
                },
                end_of_run_limit_k: Some(40.0),
                min_aggregates: 5,
                ..DriftSettings::default()
            },
            alerts: AlertSettings {
                trend_above_k_per_day: Some(0.5),
                end_of_run_within_days: Some(90.0),
                cusum: true,
                data_quality_after_ms: Some(2 * H),
                self_monitoring: false,
                bed_rise_excess_k: None,
                gross_error_samples: None,
            },
            alarms: vec![alarm_spec("approach-high", 20.0, 2)],
            offline_below_bar: Some(5.0),
        }
    }

    #[test]
    fn a_step_is_one_level_shift_alert_and_no_trend() {
        // Invented: 20 days at 8 K ± 0.3, then a permanent step to 18 K (a poisoning).
        let s = step_settings();
        let mut w = ReactorWatch::new(&s).unwrap();
        let cusum = w
            .watched
            .iter()
            .position(|x| x.alarm.config().id == "cusum")
            .unwrap();
        let t0 = 100 * D;
        let mut raised = Vec::new();
        let mut max_s: f64 = 0.0;
        let mut forecasts_after_step = Vec::new();
        for h in 0..(40 * 24) {
            let t = t0 + h * H;
            let v = if h < 20 * 24 { 8.0 } else { 18.0 } + wobble(h, 0.3);
            let (fig, ev) = w.observe(&s, &eval(t, Some(v), Quality::Good, None), t);
            max_s = max_s.max(fig.cusum_k.unwrap_or(0.0));
            for (id, k) in kinds(&ev, &w) {
                if k == EventKind::Raised {
                    raised.push((
                        id,
                        h,
                        w.watched
                            .iter()
                            .find(|x| x.alarm.config().id == "cusum")
                            .and_then(|x| x.value),
                    ));
                }
            }
            if h >= 20 * 24 {
                forecasts_after_step.push((h, fig.forecast, fig.trend.map(|t| t.points)));
            }
        }
        let ids: Vec<&str> = raised.iter().map(|r| r.0.as_str()).collect();
        // One level-shift alert, the operator alarm, and no trend/end-of-run alert.
        assert_eq!(
            ids.iter().filter(|i| **i == "cusum").count(),
            1,
            "{raised:?}"
        );
        assert!(
            !ids.contains(&"trend") && !ids.contains(&"end-of-run"),
            "{raised:?}"
        );
        // The alert's value is past its limit (h = 5σ = 2.5 K) and in K.
        let limit = w.watched[cusum].alarm.config().limit;
        assert!((limit - 2.5).abs() < 1e-12, "{limit}");
        let v = raised
            .iter()
            .find(|r| r.0 == "cusum")
            .and_then(|r| r.2)
            .unwrap();
        assert!(v > limit && (v - 10.0).abs() < 1.0, "standing step {v} K");
        assert_eq!(w.watched[cusum].unit, "K");
        // Bounded: S⁺ never runs far past h (before the fix it passed 1 000 K here).
        assert!(max_s < 2.5 + 10.6, "S+ reached {max_s}");
        // No forecast from the step: learning until five whole days after it (day 25),
        // then flat.
        let step = w.figures(&s.drift).step.unwrap();
        assert!(
            (step.shift.since_ms - (t0 + 20 * D)).abs() <= 2 * H,
            "{step:?}"
        );
        for (h, f, points) in &forecasts_after_step {
            if *h < 25 * 24 {
                assert!(matches!(f, Forecast::NoTrend), "hour {h}: {f:?}");
            }
            if let Some(p) = points {
                assert!(*p <= (h - 20 * 24) as usize / 24, "hour {h}: {p} points");
            }
        }
        let last = w.figures(&s.drift);
        let t = last.trend.unwrap();
        assert!(t.slope_k_per_day.abs() < 0.05, "{t:?}");
        assert!(
            !matches!(last.forecast, Forecast::At { .. } | Forecast::Reached),
            "{:?}",
            last.forecast
        );
    }

    #[test]
    fn a_trip_is_one_state_change_and_nothing_is_raised_again() {
        let s = step_settings();
        let mut w = ReactorWatch::new(&s).unwrap();
        let t0 = 100 * D;
        let mut t = t0;
        // Approach above the 20 K alarm: raised once (2-sample on-delay), acknowledged.
        for _ in 0..3 {
            w.pressure(&s, 30.0, t);
            w.observe(&s, &eval(t, Some(22.0), Quality::Good, None), t);
            t += 5 * MINUTE_MS;
        }
        w.command(&s, &Action::Acknowledge, Some("approach-high"), "op1", t)
            .unwrap();
        // A 9.6 h trip: pressure below 5 bar, analyses keep coming (bad, then none).
        let mut trip_events = Vec::new();
        trip_events.extend(w.pressure(&s, 1.0, t));
        let trip_start = t;
        while t < trip_start + 9 * H + 36 * MINUTE_MS {
            t += 5 * MINUTE_MS;
            trip_events.extend(w.pressure(&s, 1.0, t));
            trip_events.extend(w.tick(t));
            let (_, ev) = w.observe(
                &s,
                &eval(t, None, Quality::Bad, Some(ReasonCode::StaleAnalysis)),
                t,
            );
            trip_events.extend(ev);
        }
        let k = kinds(&trip_events, &w);
        assert_eq!(k, [("off-line".to_string(), EventKind::Raised)], "{k:?}");
        // Back on line, the approach still above the limit: one state change, the
        // acknowledged alarm stays acknowledged, data quality did not count the trip.
        let mut back = Vec::new();
        back.extend(w.pressure(&s, 30.0, t));
        for _ in 0..6 {
            t += 5 * MINUTE_MS;
            back.extend(w.tick(t));
            let (_, ev) = w.observe(&s, &eval(t, Some(22.0), Quality::Good, None), t);
            back.extend(ev);
        }
        let k: Vec<(String, EventKind)> = kinds(&back, &w);
        assert_eq!(k, [("off-line".to_string(), EventKind::Cleared)], "{k:?}");
        let alarm = &w.watched[0].alarm;
        assert_eq!(
            (alarm.state(), alarm.mode()),
            (State::Acknowledged, &Mode::Active)
        );
    }

    #[test]
    fn off_line_time_does_not_count_toward_data_quality() {
        let s = step_settings();
        let mut w = ReactorWatch::new(&s).unwrap();
        let t0 = 100 * D;
        w.pressure(&s, 30.0, t0);
        w.observe(&s, &eval(t0, Some(8.0), Quality::Good, None), t0);
        // 1 h on line, 5 h off line, 50 min on line: 1 h 50 min < 2 h of on-line time.
        w.pressure(&s, 1.0, t0 + H);
        w.pressure(&s, 30.0, t0 + 6 * H);
        let ev = w.tick(t0 + 6 * H + 50 * MINUTE_MS);
        assert!(
            !kinds(&ev, &w).iter().any(|k| k.0 == "data-quality"),
            "{:?}",
            kinds(&ev, &w)
        );
        // 15 min more: 2 h 5 min on line without a good result.
        let ev = w.tick(t0 + 7 * H + 5 * MINUTE_MS);
        assert!(kinds(&ev, &w).contains(&("data-quality".into(), EventKind::Raised)));
    }
}
