//! eqwatch: how far a catalytic reactor's outlet is from chemical equilibrium.
//!
//! The numeric core is its own crate (`eqwatch-core`, re-exported here: [`units`],
//! [`thermo`], [`composition`], [`approach`], [`equilibrium`], [`monitor`], ...). This
//! crate puts it to work; the data walk one way:
//! - [`config`]: the plant configuration file, validated into settings with key paths.
//! - `wire` (crate-private, feature `cli`): every JSON shape in and out.
//! - `pipeline` (crate-private, feature `cli`): route, decode, monitor, watch, commands.
//! - `replay` (feature `cli`): CSV history through the pipeline; results and plots.
//! - [`plot`]: SVG charts rendered as strings.
//! - `report` (feature `cli`): a period's catalyst report as HTML from published records.
//! - `daemon` (feature `daemon`): MQTT, journal, HTTP, signals; the only tokio.
//! - `web` (feature `daemon`): the live page, its sessions and what it shows (pure).
//! - `cli` (feature `cli`): the engineer's calculator behind `eqwatch calc|equilibrium|species`.
//! - [`demo`]: the invented plant ([`demo::sim`]) and the one-command demo (feature `daemon`).
//!
//! Each folder's own docs say what it may not import; `tests/architecture.rs` checks it.
//!
//! Advisory only: eqwatch is not a safety function; see the README.

// Items marked `pub` are reachable from outside; everything else is `pub(crate)` or private
// (checked with the full feature set, where every module is built).
#![cfg_attr(feature = "daemon", warn(unreachable_pub))]

// The numeric core, re-exported so that `eqwatch::approach` and `crate::units` name
// the same modules everywhere.
pub use eqwatch_core::{
    approach, bedprofile, bedrise, composition, equilibrium, monitor, normalise, reconcile, solve,
    thermo, timefmt, units,
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
pub(crate) mod report;
#[cfg(feature = "daemon")]
pub mod web;
#[cfg(feature = "cli")]
pub(crate) mod wire;

#[cfg(feature = "fuzzing")]
pub mod fuzz;
