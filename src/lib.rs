//! eqwatch: how far a catalytic reactor's outlet is from chemical equilibrium.
//!
//! Crate map (the numeric core builds with `--no-default-features`, without tokio):
//! - [`units`]: plant units to K, bar absolute and mole fraction.
//! - [`thermo`]: species data (NASA 7/9 polynomials), reactions, K(T) sources, Peng–Robinson.
//! - [`composition`]: analyser compositions, wet/dry basis, sum checks.
//! - [`approach`]: Q, Q/K, direction, affinity, equilibrium temperature, approach ± uncertainty.
//! - [`equilibrium`]: equilibrium composition with element constraints (several reactions).
//! - [`monitor`]: per-reactor alignment of inputs, quality checks and evaluation (time passed in).
//! - [`solve`]: bracketed scalar solvers.
//! - [`timefmt`]: RFC 3339 and epoch-millisecond timestamps.
//! - [`plot`]: SVG charts (approach, trend, key component; overview) rendered as strings.
//! - [`config`]: the plant configuration file, validated into settings with key paths.
//! - `cli` (feature `cli`): the engineer's calculator behind `eqwatch calc|equilibrium|species`.
//!
//! Advisory only: eqwatch is not a safety function; see the README.

// Items marked `pub` are reachable from outside; everything else is `pub(crate)` or private
// (checked with the full feature set, where every module is built).
#![cfg_attr(feature = "daemon", warn(unreachable_pub))]

// The numeric core, re-exported so that `eqwatch::approach` and `crate::units` name
// the same modules everywhere.
pub use eqwatch_core::{
    approach, bedrise, composition, equilibrium, monitor, solve, thermo, timefmt, units,
};

pub mod config;
pub mod demo;
pub mod plot;

#[cfg(feature = "cli")]
pub mod cli;
#[cfg(feature = "daemon")]
pub mod daemon;
#[cfg(feature = "cli")]
pub(crate) mod pipeline;
#[cfg(feature = "cli")]
pub mod replay;
#[cfg(feature = "cli")]
pub(crate) mod wire;
