//! The engineer's calculator, one file per command: `eqwatch calc` ([`calc`]),
//! `eqwatch equilibrium` ([`equilibrium`]), `eqwatch balance` ([`balance`]: element
//! balances and reconciliation of an inlet and an outlet stream), `eqwatch species` ([`species`]), and the
//! plain-text table any JSON answer prints as ([`table`]), and `eqwatch report` ([`report`]:
//! the period's HTML report from published records; its own rule, it reads the configuration). `eqwatch check` is the
//! configuration's own summary (`crate::config::summary`).
//!
//! Turns command-line text into core calls and results into JSON (key names carry
//! units: `temperature_k`, `pressure_bar`) or a readable table. Errors are
//! [`CliError::Input`] (exit 1, the message says what to fix) or [`CliError::Internal`]
//! (exit 2).
//!
//! Rules of this folder (checked by `tests/architecture.rs`): the core and serde_json
//! only; never the configuration, the pipeline, the daemon or the demo.

mod balance;
mod calc;
mod equilibrium;
mod report;
mod species;
mod table;

pub use balance::{BalanceInput, StreamText, balance, balance_table};
pub use calc::{CalcInput, calc, calc_table, parse_uncertainty, temperature_unit_of};
pub use equilibrium::{EquilibriumInput, equilibrium};
pub use report::{ReportArgs, report};
pub use species::species;
pub use table::table;

use serde_json::{Value, json};
use thiserror::Error;

use crate::equilibrium::EosKind;
use crate::thermo::ksource::{KModel, KSourceId};
use crate::thermo::reaction::{Reaction, parse_reaction};
use crate::thermo::species::SpeciesDb;

#[derive(Debug, Error)]
pub enum CliError {
    /// Bad input or configuration: exit 1.
    #[error("{0}")]
    Input(String),
    /// A failure of ours: exit 2.
    #[error("internal error: {0}")]
    Internal(String),
}

impl CliError {
    pub fn exit_code(&self) -> i32 {
        match self {
            Self::Input(_) => 1,
            Self::Internal(_) => 2,
        }
    }
}

pub(crate) fn input<E: std::fmt::Display>(e: E) -> CliError {
    CliError::Input(e.to_string())
}
pub(crate) fn parse_eos(s: &str) -> Result<EosKind, CliError> {
    EosKind::parse(s)
        .ok_or_else(|| CliError::Input(format!("--eos `{s}`: expected ideal or peng-robinson")))
}

/// Parses the reactions and builds their K models (`k_sources`: none = species data,
/// one = for every reaction, else one per reaction).
pub(crate) fn reactions_with_k(
    db: &SpeciesDb,
    reactions: &[String],
    k_sources: &[String],
) -> Result<Vec<(Reaction, KModel)>, CliError> {
    if reactions.is_empty() {
        return Err(CliError::Input(
            "give a reaction, e.g. --reaction \"N2 + 3 H2 = 2 NH3\"".into(),
        ));
    }
    if k_sources.len() > 1 && k_sources.len() != reactions.len() {
        return Err(CliError::Input(format!(
            "{} K sources for {} reactions: give one for all, or one per reaction",
            k_sources.len(),
            reactions.len()
        )));
    }
    let mut out = Vec::with_capacity(reactions.len());
    for (i, text) in reactions.iter().enumerate() {
        let r = parse_reaction(text, db).map_err(input)?;
        let id = match k_sources.get(i).or_else(|| k_sources.first()) {
            Some(s) => KSourceId::parse(s).map_err(input)?,
            None => KSourceId::SpeciesData,
        };
        let k = KModel::from_correlation(id, &r, db).map_err(input)?;
        out.push((r, k));
    }
    Ok(out)
}

pub(crate) fn finite(x: f64) -> Value {
    if x.is_finite() { json!(x) } else { Value::Null }
}

pub(crate) fn opt(x: Option<f64>) -> Value {
    x.map_or(Value::Null, finite)
}
