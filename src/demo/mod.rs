//! The invented demo plant and everything that shows it: the plant model and its
//! history ([`sim`]), the one-command demo ([`runner`], feature `daemon`), the embedded
//! broker ([`broker`], feature `demo-broker`) and the drop-out proxy that takes the
//! daemon's link down and up during the demo ([`proxy`]).
//!
//! Rules of this folder (checked by `tests/architecture.rs`): this is the top of the
//! house; it may use everything else. `sim` is pure (the core only: no tokio, no I/O,
//! no clock), so `eqwatch replay` tests and benches can build history without the
//! daemon. Every number in it is invented for the demo.

pub mod sim;

#[cfg(feature = "demo-broker")]
pub mod broker;
#[cfg(feature = "daemon")]
pub mod proxy;
#[cfg(feature = "daemon")]
pub mod runner;
