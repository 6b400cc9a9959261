//! Every JSON shape in and out of eqwatch: input messages ([`input`]), the result
//! message ([`result`]), and the watch's events, alarm states, commands and outcomes
//! ([`watch`]). The core never sees JSON.
//!
//! Rules of this folder (checked by `tests/architecture.rs`): the core and
//! [`crate::config`] only; never `crate::pipeline`, `crate::daemon`, `crate::replay`,
//! `crate::demo`, `crate::plot` or `crate::cli`; no tokio, rumqttc or I/O. Within the
//! folder the order is one way: `result` may use `watch` (a result carries the drift
//! figures), `watch` never uses `result`; both use the number helpers here. `metrics`
//! (the flat view of a result) uses neither: it points into the result's shape by JSON
//! Pointer, and its tests check the two agree.

#[cfg(test)]
pub(crate) mod fixtures;
pub(crate) mod input;
pub(crate) mod metrics;
pub(crate) mod result;
#[cfg(feature = "sparkplug")]
pub(crate) mod sparkplug;
#[cfg(feature = "sparkplug")]
pub(crate) mod sparkplug_b;
pub(crate) mod train;
pub(crate) mod watch;

/// Non-finite numbers go out as `null` (JSON has no NaN), never as a made-up value.
pub(crate) fn finite(x: f64) -> Option<f64> {
    x.is_finite().then_some(x)
}

pub(crate) fn finite_opt(x: Option<f64>) -> Option<f64> {
    x.and_then(finite)
}
