//! What replay keeps per reactor for its plots: compact points, events, baselines,
//! off-line spans and daily aggregates (the daemon keeps none).

use crate::monitor::alarm::EventKind;
use crate::monitor::watch::{Class, DriftFigures};

/// One evaluation as kept for plots (replay): compact (f32, NaN for "none"), since a
/// year holds half a million of them.
#[derive(Debug, Clone, Copy)]
pub struct TracePoint {
    pub t_ms: i64,
    pub good: bool,
    /// A bad result: a gap in both charts (an approach that is only not meaningful, as
    /// at a methanator, leaves the key component chart drawn).
    pub bad: bool,
    pub approach_k: f32,
    pub uncertainty_k: f32,
    pub key_measured: f32,
    pub key_equilibrium: f32,
    /// Wet H2O mole fraction of the gas as evaluated and at equilibrium (NaN when the
    /// model has no water), to put the key component on a dry basis.
    pub water_measured: f32,
    pub water_equilibrium: f32,
}

pub(super) fn compact(x: Option<f64>) -> f32 {
    x.map_or(f32::NAN, |v| v as f32)
}

/// `None` for NaN.
pub(crate) fn expand(x: f32) -> Option<f64> {
    (!x.is_nan()).then_some(f64::from(x))
}

/// An alert or alarm event as kept for plots (replay).
#[derive(Debug, Clone)]
pub struct TraceEvent {
    pub t_ms: i64,
    pub class: Class,
    pub alarm: String,
    pub kind: EventKind,
}

/// A baseline in force from `from_ms` (to the next span's start).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TraceBaseline {
    pub from_ms: i64,
    pub to_ms: i64,
    pub approach_k: f64,
    pub sigma_k: f64,
}

/// Per-reactor trace for plots: slim points, events, baselines and the last drift
/// figures (the trend and forecast at the end).
#[derive(Debug, Clone, Default)]
pub struct Trace {
    pub points: Vec<TracePoint>,
    pub events: Vec<TraceEvent>,
    pub baselines: Vec<TraceBaseline>,
    pub last_drift: Option<DriftFigures>,
    /// Off-line periods (from, to; `None` = still off line at the end).
    pub offline: Vec<(i64, Option<i64>)>,
    /// Steady-state aggregates of every run: (middle of the period ms, mean approach K).
    pub aggregates: Vec<(i64, f64)>,
    /// The run and the number of its aggregates already copied into `aggregates`.
    pub aggregates_seen: (Option<i64>, usize),
}
