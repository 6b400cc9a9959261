//! The processing path, synchronous and deterministic: route a message to its reactors,
//! decode it ([`crate::wire`]), hand it to the reactor's monitor, run the watch (drift,
//! alerts, alarms) over each evaluation, carry out operator commands, and produce the
//! records to journal and publish. The live daemon feeds it MQTT messages; `eqwatch
//! replay` feeds it CSV rows, so both take the same path after decoding.
//!
//! Rules of this folder (checked by `tests/architecture.rs`): no tokio, no rumqttc, no
//! file or network I/O, no clock (every function takes the time it needs). It may use
//! the core, [`crate::config`] (validated settings) and [`crate::wire`]; never
//! `crate::daemon`, `crate::replay`, `crate::demo`, `crate::plot` or `crate::cli`.
//! Logging goes through the `tracing` facade only.

pub mod engine;
pub mod metrics;

pub use engine::{Engine, Lane, Plant, Route, Sink, Trace};

/// A message as it came from the broker (or a test).
#[derive(Debug, Clone)]
pub struct RawInput {
    pub topic: String,
    pub payload: Vec<u8>,
    pub arrival_ms: i64,
}

/// One result to journal.
#[derive(Debug)]
pub struct Append {
    pub topic: String,
    pub retain: bool,
    pub payload: String,
}
