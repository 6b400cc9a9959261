//! The configuration file as written: serde types, unknown keys refused.

use std::collections::BTreeMap;

use serde::Deserialize;
use toml::Spanned;

/// A table of one scalar input: the keys every scalar input has (`tag`, `topic`, the
/// decoder and its JSON Pointers, `unit`, `max_age`, `plausible`), and the table's own
/// keys before them. Unknown keys are refused.
macro_rules! scalar_table {
    ($(#[$outer:meta])* $vis:vis struct $name:ident { $($(#[$m:meta])* $fvis:vis $field:ident : $ty:ty,)* }) => {
        $(#[$outer])*
        #[derive(Debug, Clone, Deserialize)]
        #[serde(deny_unknown_fields)]
        $vis struct $name {
            $($(#[$m])* $fvis $field: $ty,)*
            pub tag: Option<String>,
            pub topic: Option<String>,
            pub decoder: Option<String>,
            pub value_pointer: Option<String>,
            pub ts_pointer: Option<String>,
            pub quality_pointer: Option<String>,
            pub unit_pointer: Option<String>,
            pub unit: Option<String>,
            pub max_age: Option<String>,
            /// `[low, high]` in the input's configured unit; outside it a reading is implausible.
            pub plausible: Option<[f64; 2]>,
        }
    };
}

/// The configuration file as written. Every table refuses unknown keys; values stay
/// text (units, durations) until [`from_str`] validates them into [`Settings`].
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawConfig {
    pub site: String,
    /// This daemon's shard of the site (one of several daemons on one prefix).
    pub shard: Option<String>,
    pub topic_prefix: Option<String>,
    /// Also publish the flat metrics message per result (`<prefix>/<reactor>/metrics`).
    pub metrics_topic: Option<bool>,
    /// Barometric pressure with an absolute unit, e.g. `"0.98 bar"`.
    pub atmosphere: Option<String>,
    /// Species files, relative to the configuration file's folder.
    #[serde(default)]
    pub species_files: Vec<String>,
    pub broker: RawBroker,
    pub journal: RawJournal,
    pub http: Option<RawHttp>,
    /// Keyed by reactor id; the spans give the file order.
    #[serde(default)]
    pub reactors: BTreeMap<Spanned<String>, RawReactor>,
    pub commands: Option<RawCommands>,
    /// How far a reading's timestamp may be from the daemon's clock.
    pub timestamps: Option<RawTimestamps>,
    /// Eclipse Sparkplug B: inputs from edge nodes, results as an edge node.
    pub sparkplug: Option<RawSparkplug>,
    /// Trains of units (or the beds of one converter) summarised together.
    #[serde(default)]
    pub trains: BTreeMap<String, RawTrain>,
}

/// `[trains.<id>]`: reactors summarised together, in process order.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawTrain {
    pub name: Option<String>,
    pub reactors: Vec<String>,
}

/// `[sparkplug]`: eqwatch's own Sparkplug connection.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawSparkplug {
    pub client_id: Option<String>,
    pub group_id: Option<String>,
    pub edge_node_id: Option<String>,
    pub publish: Option<bool>,
    pub host_id: Option<String>,
    pub reorder_timeout: Option<String>,
}

/// `[timestamps]`: `max_ahead` and `max_behind` of the daemon's clock, as durations.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawTimestamps {
    pub max_ahead: Option<String>,
    pub max_behind: Option<String>,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawBroker {
    pub url: String,
    pub client_id: Option<String>,
    pub protocol: Option<String>,
    pub keep_alive: Option<String>,
    pub session_expiry: Option<String>,
    pub connect_timeout: Option<String>,
    pub username: Option<String>,
    pub password_file: Option<String>,
    pub password_env: Option<String>,
    pub ca_file: Option<String>,
    pub client_cert_file: Option<String>,
    pub client_key_file: Option<String>,
    pub max_packet_bytes: Option<i64>,
    pub reconnect_min: Option<String>,
    pub reconnect_max: Option<String>,
    pub inflight: Option<i64>,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawJournal {
    pub dir: String,
    pub max_file_bytes: Option<i64>,
    pub max_total_bytes: Option<i64>,
    pub fsync_interval: Option<String>,
    pub memory_max_bytes: Option<i64>,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawHttp {
    /// `"127.0.0.1:9873"` or `"off"` (default `127.0.0.1:9873`).
    pub listen: Option<String>,
    /// Who may log in to the live page and send commands from it, by user name.
    #[serde(default)]
    pub users: BTreeMap<String, RawHttpUser>,
}

/// One live-page user: `password_hash` from `eqwatch hash-password`, the commands allowed.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawHttpUser {
    pub password_hash: String,
    #[serde(default)]
    pub may: Vec<String>,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawReactor {
    pub name: Option<String>,
    #[serde(default)]
    pub reactions: Vec<RawReaction>,
    pub eos: Option<String>,
    pub key_component: Option<String>,
    pub band: Option<f64>,
    pub transient: Option<String>,
    pub uncertainty: Option<RawUncertainty>,
    pub composition: RawComposition,
    #[serde(default)]
    pub temperature: Vec<RawScalar>,
    pub pressure: RawScalar,
    pub steam_ratio: Option<RawSteamRatio>,
    /// Pressure below which the unit counts as off line, e.g. `"5 barg"`.
    pub offline_below: Option<String>,
    pub drift: Option<RawDrift>,
    pub alerts: Option<RawAlerts>,
    #[serde(default)]
    pub alarm: Vec<RawAlarm>,
    pub bed_rise: Option<RawBedRise>,
    pub bed_profile: Option<RawBedProfile>,
    #[serde(default)]
    pub flow: Vec<RawFlow>,
    pub normalise: Option<RawNormalise>,
    /// The inlet analyser (the same keys as `composition`; one message per analysis).
    pub inlet_composition: Option<RawComposition>,
    pub reconcile: Option<RawReconcile>,
}

/// `[reactors.<id>.reconcile]`: element balances across the reactor and their
/// weighted least-squares reconciliation.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawReconcile {
    /// One standard deviation of an analysed fraction, e.g. `"1 %"` of the reading
    /// (default 1 %) ...
    pub analyser_uncertainty: Option<String>,
    /// ... but never below this, e.g. `"0.02 mol%"` (default).
    pub analyser_floor: Option<String>,
    /// Overall significance of the gross error tests, e.g. `"5 %"` (default).
    pub significance: Option<String>,
    /// The `gross-error` alert: results in a row failing the global test (default 3;
    /// 0 = no alert).
    pub alert_after: Option<i64>,
}

scalar_table! {
    /// `[[reactors.<id>.flow]]`: a flow meter: the scalar input keys, which stream it
    /// measures and its standard deviation.
    pub(crate) struct RawFlow {
        /// `inlet` (dry gas in), `outlet` (dry gas out) or `steam` (steam in).
        pub stream: Option<String>,
        /// One standard deviation, e.g. `"1.5 %"` of the reading (default 2 %).
        pub uncertainty: Option<String>,
    }
}

/// `[reactors.<id>.normalise]`: the drift statistics on the approach normalised for
/// operating conditions by a start-of-run regression.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawNormalise {
    /// Context inputs: `throughput`, `steam_ratio`, `inlet_temperature`, `pressure`.
    pub inputs: Vec<String>,
    /// Learning samples needed at least (default max(30, inputs + 10)).
    pub min_samples: Option<i64>,
    /// How far outside the learned range a sample may lie, e.g. `"10 %"` of the span.
    pub margin: Option<String>,
}

/// `[reactors.<id>.bed_profile]`: multipoint bed thermocouples.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawBedProfile {
    /// Catalyst depth, e.g. `"3.2 m"`.
    pub depth: String,
    /// Fraction of the rise that marks the reaction front (default 0.9).
    pub front_fraction: Option<f64>,
    /// Rises below this give no front (default `"5 K"`).
    pub min_rise: Option<String>,
    /// `inlet-outlet` (default), `depth-average` or `weighted`.
    pub wabt: Option<String>,
    /// Front depth at which the catalyst is spent (default 90 % of `depth`).
    pub end_of_life_depth: Option<String>,
    /// `linear` (default) or `log-remaining`.
    pub front_interpolation: Option<String>,
    #[serde(default)]
    pub thermocouple: Vec<RawBedThermocouple>,
}

scalar_table! {
    /// `[[reactors.<id>.bed_profile.thermocouple]]`: the scalar input keys, its depth from
    /// the top of the catalyst and, for `wabt = "weighted"`, its weight.
    pub(crate) struct RawBedThermocouple {
        pub depth: Option<String>,
        pub weight: Option<f64>,
    }
}

/// `[reactors.<id>.bed_rise]`: the methanator's bed temperature rise check.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawBedRise {
    /// Tag of the reactor's `[[temperature]]` entry that measures the bed inlet.
    pub inlet_temperature: String,
    /// Design (or measured-elsewhere) inlet CO and CO2, e.g. `{ CO = "0.18 mol%", CO2 = "0.05 mol%" }`.
    pub inlet: Option<BTreeMap<String, String>>,
    /// Alert when the bed rises this much more than the inlet would explain, e.g. `"8 K"`.
    pub alert_above_expected: Option<String>,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawReaction {
    pub equation: String,
    /// Default `species-data`.
    pub k_source: Option<String>,
}

#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawUncertainty {
    pub temperature: Option<String>,
    pub pressure: Option<String>,
    pub composition: Option<String>,
    pub steam_ratio: Option<String>,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawComposition {
    pub tag: Option<String>,
    /// One analyser message with every component.
    pub topic: Option<String>,
    /// Or one topic per component (species name → topic).
    pub topics: Option<BTreeMap<String, String>>,
    /// Per-component topics only: `json` (default) or `number`.
    pub decoder: Option<String>,
    pub values_pointer: Option<String>,
    pub value_pointer: Option<String>,
    pub ts_pointer: Option<String>,
    pub unit_pointer: Option<String>,
    pub basis_pointer: Option<String>,
    pub quality_pointer: Option<String>,
    pub unit: Option<String>,
    pub basis: Option<String>,
    #[serde(default)]
    pub components: Vec<String>,
    pub sum_tolerance: Option<String>,
    pub lag: Option<String>,
    pub max_age: Option<String>,
    /// Species name → detection limit on the analyser's basis, e.g. `{ CO = "0.5 ppm" }`.
    pub detection_limits: Option<BTreeMap<String, String>>,
}

scalar_table! {
    /// `[[reactors.<id>.temperature]]` and `[reactors.<id>.pressure]`.
    pub(crate) struct RawScalar {}
}

/// A fixed `value`, or a measured ratio (`topic` and the scalar keys; no unit).
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawSteamRatio {
    pub value: Option<f64>,
    pub tag: Option<String>,
    pub topic: Option<String>,
    pub decoder: Option<String>,
    pub value_pointer: Option<String>,
    pub ts_pointer: Option<String>,
    pub quality_pointer: Option<String>,
    pub unit_pointer: Option<String>,
    pub max_age: Option<String>,
    /// `[low, high]` in the input's configured unit; outside it a reading is implausible.
    pub plausible: Option<[f64; 2]>,
}

// ---------------------------------------------------------------------------
// Parsing the file

/// `[reactors.<id>.drift]`
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawDrift {
    /// `"learn"` (default) or a given approach such as `"8 K"`.
    pub baseline: Option<String>,
    /// σ of a given baseline, e.g. `"0.5 K"`.
    pub baseline_sigma: Option<String>,
    pub baseline_window: Option<String>,
    pub baseline_min_samples: Option<i64>,
    pub sigma_floor: Option<String>,
    pub ewma_lambda: Option<f64>,
    pub ewma_l: Option<f64>,
    pub cusum_k: Option<f64>,
    pub cusum_h: Option<f64>,
    /// Smallest level shift that counts as a step, e.g. `"3 K"` (default: h in K).
    pub step: Option<String>,
    /// `"least-squares"` (default) or `"theil-sen"`.
    pub trend: Option<String>,
    pub aggregate: Option<String>,
    pub min_per_aggregate: Option<i64>,
    pub trend_window: Option<String>,
    pub min_aggregates: Option<i64>,
    pub end_of_run_limit: Option<String>,
}

/// `[reactors.<id>.alerts]`
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawAlerts {
    /// e.g. `"0.05 K/d"`.
    pub trend_above: Option<String>,
    /// e.g. `"90 d"`.
    pub end_of_run_within: Option<String>,
    pub cusum: Option<bool>,
    pub data_quality_after: Option<String>,
    pub self_monitoring: Option<bool>,
}

/// An alarm priority as written: `priority = 2` or `priority = "2"`.
#[derive(Debug, Clone, Deserialize)]
#[serde(untagged)]
pub(crate) enum RawPriority {
    Number(i64),
    Text(String),
}

/// `[[reactors.<id>.alarm]]`: one rationalised operator alarm.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawAlarm {
    pub id: String,
    /// `"approach"` or `"key-measured"`.
    pub on: String,
    pub above: Option<String>,
    pub below: Option<String>,
    pub deadband: Option<String>,
    pub on_delay: Option<String>,
    pub off_delay: Option<String>,
    pub realarm: Option<String>,
    /// 1 (highest) to 4 (lowest); default 3.
    pub priority: Option<RawPriority>,
    pub latched: Option<bool>,
    pub max_shelve: Option<String>,
    pub rationale: String,
}

/// `[commands]`
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawCommands {
    #[serde(default)]
    pub allowed_users: Vec<String>,
    #[serde(default)]
    pub allowed_clients: Vec<String>,
}
