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
    /// Readings outside this range (in K, bar absolute or mol/mol) are implausible.
    pub plausible: Plausible,
}

/// The range a reading must fall in to be believed, in the monitor's units (K, bar
/// absolute, mol/mol). A transmitter over range, a wrong unit or a corrupt message
/// gives values far outside it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Plausible {
    pub min: f64,
    pub max: f64,
}

impl Plausible {
    /// Defaults that every reactor eqwatch knows runs inside [common practice: reformer
    /// outlets reach about 1000 °C, SO2 converters run near 1.2 bar abs, ammonia loops
    /// up to about 300 bar, steam-to-dry-gas ratios stay below about 1.5]: 250–1600 K,
    /// 0.5–400 bar abs, 0–5 mol/mol. Configure tighter ranges per input.
    pub fn default_for(unit: &ScalarUnit) -> Self {
        match unit {
            ScalarUnit::Temperature(_) => Self {
                min: 250.0,
                max: 1600.0,
            },
            ScalarUnit::Pressure(_) => Self {
                min: 0.5,
                max: 400.0,
            },
            ScalarUnit::Ratio => Self { min: 0.0, max: 5.0 },
            // Up to 100 000 kmol/h: beyond the largest single-train plants [common practice].
            ScalarUnit::Flow(_) => Self { min: 0.0, max: 1e5 },
        }
    }

    /// Whether `value` is believable (NaN never is).
    pub fn contains(&self, value: f64) -> bool {
        value >= self.min && value <= self.max
    }
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

/// Multipoint bed thermocouples (see [`crate::bedprofile`]): the bed, and each
/// thermocouple with its depth from the top of the catalyst (m), inlet first.
#[derive(Debug, Clone, PartialEq)]
pub struct BedProfileSpec {
    pub geometry: crate::bedprofile::BedGeometry,
    pub thermocouples: Vec<(InputSpec, f64)>,
}

/// Which stream a flow meter measures.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FlowStream {
    /// Dry gas into the reactor (the analysed inlet gas without its water).
    InletDry,
    /// Dry gas out of the reactor.
    OutletDry,
    /// Steam (water) into the reactor.
    InletSteam,
}

impl FlowStream {
    pub fn as_str(self) -> &'static str {
        match self {
            Self::InletDry => "inlet",
            Self::OutletDry => "outlet",
            Self::InletSteam => "steam",
        }
    }
}

/// A flow meter of the reactor.
#[derive(Debug, Clone, PartialEq)]
pub struct FlowSpec {
    pub input: InputSpec,
    pub stream: FlowStream,
    /// One standard deviation of the meter, as a fraction of the reading (for the
    /// reconciliation's weights).
    pub sigma_rel: f64,
}

/// Inlet/outlet element balances and their reconciliation (see [`crate::reconcile`]).
#[derive(Debug, Clone)]
pub struct ReconcileSpec {
    /// The inlet analyser (dry basis, one message with every component).
    pub inlet: AnalysisSpec,
    /// One standard deviation of an analysed mole fraction: relative, with a floor
    /// (mole fraction) for the small components.
    pub analyser_sigma_rel: f64,
    pub analyser_sigma_floor: f64,
    pub options: crate::reconcile::Options,
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
    /// Outlet thermocouples further apart than this disagree: with three or more, the one
    /// furthest from the median is left out; with two, the result is uncertain (K).
    pub max_spread_k: f64,
    /// Drift statistics, alerts and operator alarms.
    pub watch: WatchSettings,
    /// Each reaction written out canonically (for results; worked out once).
    pub reaction_labels: Vec<String>,
    pub bed_rise: Option<BedRiseSpec>,
    /// Multipoint bed thermocouples, where configured.
    pub bed_profile: Option<BedProfileSpec>,
    /// Flow meters (throughput for the normalised approach; the reconciliation's flows).
    pub flows: Vec<FlowSpec>,
    /// The inlet analysis and the reconciliation, where configured.
    pub reconcile: Option<ReconcileSpec>,
    /// How far from the receiving clock a reading's timestamp may be.
    pub clock: ClockWindow,
}

/// Readings stamped further than this from the time they arrive are refused: one
/// reading from a misset clock (or a year-9999 test message) must never poison the
/// ordering of those that follow.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct ClockWindow {
    /// Ahead of the receiving clock (clock skew, an analyser stamping its report).
    pub max_ahead: Duration,
    /// Behind it (a broker delivering what it held through an outage).
    pub max_behind: Duration,
}

impl Default for ClockWindow {
    /// 5 min ahead, 7 d behind [common practice: NTP-synchronised plant clocks agree to
    /// well under a second; a persistent MQTT session holds inputs through outages of
    /// days].
    fn default() -> Self {
        Self {
            max_ahead: Duration::from_secs(5 * 60),
            max_behind: Duration::from_secs(7 * 24 * 3600),
        }
    }
}

impl ClockWindow {
    /// How far `ts_ms` is ahead of `now_ms` (negative: behind) when that is outside the
    /// window; `None` inside it.
    pub fn outside(&self, ts_ms: i64, now_ms: i64) -> Option<i64> {
        let ahead = ts_ms.saturating_sub(now_ms);
        let max_ahead = crate::units::duration_ms(self.max_ahead);
        let max_behind = crate::units::duration_ms(self.max_behind);
        (ahead > max_ahead || ahead < max_behind.saturating_neg()).then_some(ahead)
    }
}

impl ReactorSpec {
    /// Whether the composition arrives one component at a time.
    pub fn per_component(&self) -> bool {
        self.composition.delivery == Delivery::PerComponent
    }
}
