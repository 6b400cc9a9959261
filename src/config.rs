//! Plant configuration: one TOML file, read into [`RawConfig`] (serde, unknown keys
//! refused) and validated in one step into [`Settings`] (fixed units, built models),
//! collecting every problem with its key path (`reactors.lts1.composition.unit: ...`).
//!
//! Pure apart from reading the files the configuration names (species files, password
//! files) and environment variables for secrets; validation happens before any network
//! call, so nothing downstream sees an invalid option.

use std::net::SocketAddr;
use std::path::PathBuf;
use std::time::Duration;

use crate::approach::{ReactorModel, Uncertainty};
use crate::composition::Basis;
use crate::equilibrium::{EosKind, EquilibriumSystem};
use crate::thermo::ksource::KModel;
use crate::thermo::reaction::Reaction;
use crate::thermo::species::SpeciesDb;
use crate::units::{CompositionUnit, PressureUnit, TemperatureUnit};

/// Validated settings of one eqwatch process.
#[derive(Debug, Clone)]
pub struct Settings {
    /// Site name (letters, digits, `-`, `_`).
    pub site: String,
    /// Output topic prefix, default `eqwatch/<site>`; no wildcards, no trailing `/`.
    pub topic_prefix: String,
    pub broker: BrokerSettings,
    pub journal: JournalSettings,
    /// `None` when `[http] listen = "off"`; default 127.0.0.1:9464.
    pub http_listen: Option<SocketAddr>,
    /// Site atmospheric pressure for gauge readings, bar (default 1.01325).
    pub atmosphere_bar: f64,
    /// Built-in species plus the configured species files.
    pub species: SpeciesDb,
    pub reactors: Vec<ReactorSettings>,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum MqttProtocol {
    V311,
    V5,
}

#[derive(Debug, Clone)]
pub struct BrokerSettings {
    pub host: String,
    pub port: u16,
    /// `mqtts://` URL.
    pub tls: bool,
    pub client_id: String,
    pub protocol: MqttProtocol,
    pub keep_alive: Duration,
    /// Zero: clean session. Above zero: a persistent session (MQTT 3.1.1
    /// clean_session = false; MQTT 5 session expiry interval).
    pub session_expiry: Duration,
    pub username: Option<String>,
    /// Read from `password_file` or `password_env` during validation.
    pub password: Option<String>,
    pub ca_file: Option<PathBuf>,
    pub client_cert_file: Option<PathBuf>,
    pub client_key_file: Option<PathBuf>,
    pub max_packet_bytes: usize,
    pub reconnect_min: Duration,
    pub reconnect_max: Duration,
    /// QoS 1 publishes in flight at once.
    pub inflight: u16,
}

#[derive(Debug, Clone)]
pub struct JournalSettings {
    pub dir: PathBuf,
    pub max_file_bytes: u64,
    pub max_total_bytes: u64,
    pub fsync_interval: Duration,
}

/// How a scalar (temperature, pressure, steam ratio) message is decoded.
#[derive(Debug, Clone, PartialEq)]
pub enum ScalarDecoder {
    /// The payload is a bare number; the arrival time is its timestamp.
    Number,
    /// JSON; JSON Pointers (RFC 6901) to the fields. Defaults: `/value`, `/ts`,
    /// `/quality`, `/unit` (the last three optional in the message).
    Json {
        value_pointer: String,
        ts_pointer: Option<String>,
        quality_pointer: Option<String>,
        unit_pointer: Option<String>,
    },
}

/// The unit a scalar input is configured in (a message's own `unit` field, where
/// present, must agree in kind and overrides it).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum ScalarUnit {
    Temperature(TemperatureUnit),
    Pressure(PressureUnit),
    /// Dimensionless (mol H2O per mol dry gas).
    Ratio,
}

#[derive(Debug, Clone, PartialEq)]
pub struct ScalarSettings {
    /// Instrument tag or a short name, for results and logs (default: the topic).
    pub tag: String,
    pub topic: String,
    pub decoder: ScalarDecoder,
    pub unit: ScalarUnit,
    /// Older readings are stale.
    pub max_age: Duration,
}

#[derive(Debug, Clone, PartialEq)]
pub enum CompositionSource {
    /// One message with every component: `{"ts": ..., "values": {"CO": 0.29, ...},
    /// "unit": "mol%", "basis": "dry", "quality": "good"}` (pointers configurable).
    Analyser {
        topic: String,
        values_pointer: String,
        ts_pointer: Option<String>,
        unit_pointer: Option<String>,
        basis_pointer: Option<String>,
        quality_pointer: Option<String>,
    },
    /// One topic per component, assembled by sample timestamp.
    PerComponent {
        /// (species name as in the species library, topic)
        topics: Vec<(String, String)>,
        decoder: ScalarDecoder,
    },
}

#[derive(Debug, Clone)]
pub struct CompositionSettings {
    pub tag: String,
    pub source: CompositionSource,
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
}

#[derive(Debug, Clone)]
pub enum SteamRatioSettings {
    Fixed(f64),
    Measured(ScalarSettings),
}

#[derive(Debug, Clone)]
pub struct ReactorSettings {
    /// Key in the config (`reactors.<id>`), used in topics: letters, digits, `-`, `_`.
    pub id: String,
    pub name: String,
    pub reactions: Vec<(Reaction, KModel)>,
    pub eos: EosKind,
    /// The gas: the analyser's components, then H2O when the basis is dry.
    pub model: ReactorModel,
    /// Equilibrium of the measured gas (same species order as `model`).
    pub equilibrium: EquilibriumSystem,
    /// Species library index of the key component (default: the first reaction's
    /// single product, else its first reactant).
    pub key_component: usize,
    pub composition: CompositionSettings,
    /// One or more thermocouples (averaged; the spread is published).
    pub temperatures: Vec<ScalarSettings>,
    pub pressure: ScalarSettings,
    /// Required when the basis is dry.
    pub steam_ratio: Option<SteamRatioSettings>,
    pub uncertainty: Uncertainty,
    /// Temperature moving faster than this over the analyser lag flags a transient (K/min).
    pub transient_k_per_min: f64,
}
