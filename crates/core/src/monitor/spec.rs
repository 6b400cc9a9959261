//! What the monitor needs to know about one reactor: its reactions and gas model, each
//! input's tag, unit and maximum age, the analysis basis and lag, the uncertainty and
//! the watch settings. Built by the configuration; carries no topics, JSON Pointers
//! or other wiring (those stay with the application that routes messages).

use std::time::Duration;

use crate::approach::{ReactorModel, Uncertainty};
use crate::composition::Basis;
use crate::equilibrium::{EosKind, EquilibriumSystem};
use crate::monitor::watch::WatchSettings;
use crate::thermo::ksource::KModel;
use crate::thermo::reaction::Reaction;
use crate::units::{CompositionUnit, ScalarUnit};

/// One scalar input (a thermocouple, the pressure or a measured steam ratio).
#[derive(Debug, Clone, PartialEq)]
pub struct InputSpec {
    /// Instrument tag or a short name, for results and logs.
    pub tag: String,
    /// Where the reading comes from, for messages that tell an engineer where to look
    /// (the application puts its topic here); never parsed.
    pub origin: String,
    /// The unit the input is configured in.
    pub unit: ScalarUnit,
    /// Older readings are stale.
    pub max_age: Duration,
}

/// How the analyser reports.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Delivery {
    /// One message with every component.
    Whole,
    /// One reading per component, assembled by sample timestamp.
    PerComponent,
}

/// The outlet analysis.
#[derive(Debug, Clone)]
pub struct AnalysisSpec {
    pub tag: String,
    pub delivery: Delivery,
    /// Default unit of the values (a message may carry its own).
    pub unit: CompositionUnit,
    pub basis: Basis,
    /// Species names as the library spells them, in the analyser's order.
    pub components: Vec<String>,
    /// Fraction (0.02 = the components may sum to 100 ± 2 mol%).
    pub sum_tolerance: f64,
    /// Sample-to-report delay: the analysis is stamped at its sample time minus this.
    pub lag: Duration,
    pub max_age: Duration,
    /// Per component (same order as `components`): the analyser's detection limit as a
    /// mole fraction on the analyser's basis, where one is configured.
    pub detection_limits: Vec<Option<f64>>,
}

/// Where the water of a dry analysis comes from.
#[derive(Debug, Clone)]
pub enum SteamRatioSpec {
    Fixed(f64),
    Measured(InputSpec),
}

/// The bed temperature rise check (see [`crate::bedrise`]).
#[derive(Debug, Clone, PartialEq)]
pub struct BedRiseSpec {
    /// Index into `temperatures` of the inlet thermocouple (left out of the outlet mean).
    pub inlet: usize,
    /// Inlet CO and CO2 mole fractions, when configured.
    pub inlet_co_co2: Option<(f64, f64)>,
}

/// One monitored reactor.
#[derive(Debug, Clone)]
pub struct ReactorSpec {
    /// Short identifier: letters, digits, `-`, `_`.
    pub id: String,
    pub name: String,
    pub reactions: Vec<(Reaction, KModel)>,
    pub eos: EosKind,
    /// The gas: the analyser's components, then H2O when the basis is dry.
    pub model: ReactorModel,
    /// Equilibrium of the measured gas (same species order as `model`).
    pub equilibrium: EquilibriumSystem,
    /// Species library index of the key component.
    pub key_component: usize,
    pub composition: AnalysisSpec,
    /// One or more thermocouples (averaged; the spread is published).
    pub temperatures: Vec<InputSpec>,
    pub pressure: InputSpec,
    /// Required when the basis is dry.
    pub steam_ratio: Option<SteamRatioSpec>,
    pub uncertainty: Uncertainty,
    /// Temperature moving faster than this over the analyser lag flags a transient (K/min).
    pub transient_k_per_min: f64,
    /// Drift statistics, alerts and operator alarms.
    pub watch: WatchSettings,
    /// Each reaction written out canonically (for results; worked out once).
    pub reaction_labels: Vec<String>,
    pub bed_rise: Option<BedRiseSpec>,
}

impl ReactorSpec {
    /// Whether the composition arrives one component at a time.
    pub fn per_component(&self) -> bool {
        self.composition.delivery == Delivery::PerComponent
    }
}
