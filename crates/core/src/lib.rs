//! eqwatch's numeric core: how far a catalytic reactor's outlet is from chemical
//! equilibrium, and how that gap moves. Plain Rust: no runtime, no network, no files,
//! no clock (every function that needs the time is given it). The application crate
//! (`eqwatch`) routes messages, reads files and talks MQTT around it.
//!
//! The data walk one way, top to bottom:
//! - [`units`]: plant units to K, bar absolute and mole fraction; [`timefmt`] for RFC 3339.
//! - [`thermo`]: species data (NASA 7/9 polynomials), reactions, K(T) sources, Peng–Robinson.
//! - [`solve`]: bracketed scalar solvers.
//! - [`composition`]: analyser compositions, wet/dry basis, sum checks.
//! - [`approach`]: Q, Q/K, direction, affinity, equilibrium temperature, approach ± uncertainty.
//! - [`equilibrium`]: equilibrium composition with element constraints (several reactions).
//! - [`bedrise`]: the adiabatic bed temperature rise a methanator's inlet predicts.
//! - [`bedprofile`]: multipoint bed thermocouples: rise, WABT, the reaction front and its
//!   end-of-life forecast.
//! - [`normalise`]: the approach expected at today's conditions (a start-of-run regression
//!   on throughput, steam ratio, inlet temperature, pressure) and the residual from it.
//! - [`reconcile`]: inlet/outlet element balances, weighted least-squares reconciliation
//!   and gross error detection (global and measurement tests).
//! - [`monitor`]: per-reactor alignment of inputs, quality checks and evaluation over a
//!   [`monitor::spec::ReactorSpec`]; drift statistics, ISA-18.2 alarms and the watch.
//!
//! Advisory only: eqwatch is not a safety function.

pub mod approach;
pub mod bedprofile;
pub mod bedrise;
pub mod composition;
pub mod equilibrium;
pub mod monitor;
pub mod normalise;
pub mod reconcile;
pub mod solve;
pub mod thermo;
pub mod timefmt;
pub mod units;
