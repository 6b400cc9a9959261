//! Plant configuration: one TOML file, read into [`RawConfig`] (serde, unknown keys
//! refused) and validated in one step into [`Settings`] (fixed units, built models),
//! collecting every problem with its key path (`reactors.lts1.composition.unit: ...`).
//!
//! Pure apart from reading the files the configuration names (species files, password
//! files) and environment variables for secrets; validation happens before any network
//! call, so nothing downstream sees an invalid option.

use std::collections::BTreeMap;
use std::fmt;
use std::fs;
use std::io;
use std::net::SocketAddr;
use std::ops::Range;
use std::path::{Path, PathBuf};
use std::time::Duration;

mod watch;
use crate::monitor::watch::WatchSettings;
pub use watch::{CommandSettings, RawAlarm, RawAlerts, RawCommands, RawDrift};

use serde::Deserialize;
use thiserror::Error;
use toml::Spanned;
use toml::de::{DeTable, DeValue};

use crate::approach::{DEFAULT_BAND_LN, ModelError, ReactorModel, Uncertainty};
use crate::composition::Basis;
use crate::equilibrium::{EosKind, EquilibriumError, EquilibriumSystem};
use crate::monitor::spec::{
    AnalysisSpec, BedRiseSpec, Delivery, InputSpec, ReactorSpec, SteamRatioSpec,
};
use crate::thermo::ksource::{KModel, KSourceId};
use crate::thermo::reaction::{Reaction, parse_reaction, unknown_hint};
use crate::thermo::species::SpeciesDb;
pub use crate::units::ScalarUnit;
use crate::units::{
    CompositionUnit, PressureUnit, STANDARD_ATMOSPHERE_BAR, TemperatureUnit, UnitError,
    split_quantity,
};

/// Validated settings of one eqwatch process.
#[derive(Debug, Clone)]
pub struct Settings {
    /// Site name (letters, digits, `-`, `_`).
    pub site: String,
    /// Output topic prefix, default `eqwatch/<site>`; no wildcards, no trailing `/`.
    pub topic_prefix: String,
    pub broker: BrokerSettings,
    pub journal: JournalSettings,
    /// `None` when `[http] listen = "off"`; default 127.0.0.1:9873.
    pub http_listen: Option<SocketAddr>,
    /// Site atmospheric pressure for gauge readings, bar (default 1.01325).
    pub atmosphere_bar: f64,
    /// Built-in species plus the configured species files.
    pub species: SpeciesDb,
    pub reactors: Vec<ReactorSettings>,
    /// Who may send operator commands.
    pub commands: CommandSettings,
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

/// A scalar input as validated (split into its [`InputSpec`] and [`ScalarSource`]).
#[derive(Debug, Clone, PartialEq)]
struct ScalarSettings {
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
enum SteamRatioSettings {
    Fixed(f64),
    Measured(ScalarSettings),
}

/// How a scalar input arrives: its topic and how its payload is decoded.
#[derive(Debug, Clone, PartialEq)]
pub struct ScalarSource {
    pub topic: String,
    pub decoder: ScalarDecoder,
}

/// Where a reactor's inputs arrive (same order as the spec's inputs).
#[derive(Debug, Clone)]
pub struct Wiring {
    pub composition: CompositionSource,
    pub temperatures: Vec<ScalarSource>,
    pub pressure: ScalarSource,
    /// Where the steam ratio is measured.
    pub steam_ratio: Option<ScalarSource>,
}

/// One configured reactor: what the monitor needs ([`ReactorSpec`]) and where its
/// inputs arrive ([`Wiring`]).
#[derive(Debug, Clone)]
pub struct ReactorSettings {
    pub spec: ReactorSpec,
    pub wiring: Wiring,
}

impl ScalarSettings {
    fn split(self) -> (InputSpec, ScalarSource) {
        (
            InputSpec {
                tag: self.tag,
                origin: self.topic.clone(),
                unit: self.unit,
                max_age: self.max_age,
            },
            ScalarSource {
                topic: self.topic,
                decoder: self.decoder,
            },
        )
    }
}

impl SteamRatioSettings {
    fn split(self) -> (SteamRatioSpec, Option<ScalarSource>) {
        match self {
            Self::Fixed(v) => (SteamRatioSpec::Fixed(v), None),
            Self::Measured(m) => {
                let (spec, source) = m.split();
                (SteamRatioSpec::Measured(spec), Some(source))
            }
        }
    }
}

// ---------------------------------------------------------------------------
// Problems

/// One thing wrong with a configuration: the key path to fix and what is expected.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ConfigProblem {
    /// Dotted key path (`reactors.lts1.composition.unit`, `species_files[0]`), or
    /// `(file)` for a problem with the file as a whole (unreadable, TOML syntax).
    pub path: String,
    pub message: String,
}

impl fmt::Display for ConfigProblem {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}: {}", self.path, self.message)
    }
}

/// Every problem found in a configuration, in the order found (never empty).
#[derive(Debug, Clone, PartialEq, Eq, Error)]
#[error("{}", one_per_line(.problems))]
pub struct ConfigErrors {
    pub problems: Vec<ConfigProblem>,
}

fn one_per_line(problems: &[ConfigProblem]) -> String {
    problems
        .iter()
        .map(ToString::to_string)
        .collect::<Vec<_>>()
        .join("\n")
}

impl ConfigErrors {
    fn one(path: impl Into<String>, message: impl Into<String>) -> Self {
        Self {
            problems: vec![ConfigProblem {
                path: path.into(),
                message: message.into(),
            }],
        }
    }
}

/// Collects problems; an identical problem found twice is kept once.
#[derive(Debug, Default)]
struct Problems(Vec<ConfigProblem>);

impl Problems {
    fn add(&mut self, path: impl Into<String>, message: impl Into<String>) {
        let problem = ConfigProblem {
            path: path.into(),
            message: message.into(),
        };
        if !self.0.contains(&problem) {
            self.0.push(problem);
        }
    }

    fn len(&self) -> usize {
        self.0.len()
    }

    fn is_empty(&self) -> bool {
        self.0.is_empty()
    }

    fn into_errors(self) -> ConfigErrors {
        ConfigErrors { problems: self.0 }
    }
}

/// `prefix.key`, quoting a key that is not a bare TOML key.
fn key_path(prefix: &str, key: &str) -> String {
    let bare = !key.is_empty()
        && key
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_');
    let key = if bare {
        key.to_string()
    } else {
        format!("\"{}\"", key.replace('\\', "\\\\").replace('"', "\\\""))
    };
    if prefix.is_empty() {
        key
    } else {
        format!("{prefix}.{key}")
    }
}

fn is_name_char(c: char) -> bool {
    c.is_ascii_alphanumeric() || c == '-' || c == '_'
}

/// A unit problem without the unit module's own "what:" prefix (the key path says it).
fn unit_message(e: &UnitError) -> String {
    match e {
        UnitError::UnknownUnit { unit, expected, .. } => {
            format!("unknown unit \"{unit}\"; expected one of {expected}")
        }
        UnitError::Ambiguous { unit, hint, .. } => {
            format!("unit \"{unit}\" is ambiguous; {hint}")
        }
        UnitError::NoUnit { expected, .. } => format!("no unit given; expected one of {expected}"),
        other => other.to_string(),
    }
}

/// An I/O error as a lower-case reason.
fn io_reason(e: &io::Error) -> String {
    match e.kind() {
        io::ErrorKind::NotFound => "no such file".to_string(),
        io::ErrorKind::PermissionDenied => "permission denied".to_string(),
        io::ErrorKind::IsADirectory => "it is a folder, not a file".to_string(),
        _ => {
            let text = e.to_string();
            let mut chars = text.chars();
            match chars.next() {
                Some(first) => first.to_lowercase().chain(chars).collect(),
                None => "unknown i/o error".to_string(),
            }
        }
    }
}

// ---------------------------------------------------------------------------
// Durations

/// Problems with a duration such as `"15 s"`.
#[derive(Debug, Clone, PartialEq, Eq, Error)]
pub enum DurationError {
    #[error("\"{0}\" is not a number followed by a unit (ms, s, min, h or d)")]
    NotANumber(String),
    #[error("\"{0}\" has no unit; write it with ms, s, min, h or d, e.g. \"15 s\"")]
    NoUnit(String),
    #[error("\"{text}\": unknown unit \"{unit}\"; expected ms, s, min, h or d")]
    UnknownUnit { text: String, unit: String },
    #[error("\"{0}\" is negative")]
    Negative(String),
    #[error("\"{0}\" is longer than eqwatch can count (about 584 years)")]
    TooLong(String),
}

/// Parses `"250 ms"`, `"15 s"`, `"5 min"`, `"2 h"`, `"1 d"` (also `90s`, `1.5 h`).
/// A bare number is refused: a duration always says its unit.
pub fn parse_duration(text: &str) -> Result<Duration, DurationError> {
    let shown = || text.trim().to_string();
    let (value, unit) =
        split_quantity("duration", text).map_err(|_| DurationError::NotANumber(shown()))?;
    if unit.is_empty() {
        return Err(DurationError::NoUnit(shown()));
    }
    let ns_per_unit = match unit.to_ascii_lowercase().as_str() {
        "ms" | "msec" => 1e6,
        "s" | "sec" | "secs" | "second" | "seconds" => 1e9,
        "min" | "mins" | "minute" | "minutes" => 60e9,
        "h" | "hr" | "hour" | "hours" => 3600e9,
        "d" | "day" | "days" => 86_400e9,
        _ => {
            return Err(DurationError::UnknownUnit {
                text: shown(),
                unit: unit.to_string(),
            });
        }
    };
    if value < 0.0 {
        return Err(DurationError::Negative(shown()));
    }
    let ns = (value * ns_per_unit).round();
    // u64 nanoseconds: the largest whole-nanosecond span a Duration built here may hold.
    if ns >= u64::MAX as f64 {
        return Err(DurationError::TooLong(shown()));
    }
    Ok(Duration::from_nanos(ns as u64))
}

/// A duration for humans: `250 ms`, `15 s`, `5 min`, `2 h`, `1 d`, `1.5 s`.
fn show_duration(d: Duration) -> String {
    let ns = d.as_nanos();
    for (per, unit) in [
        (86_400_000_000_000u128, "d"),
        (3_600_000_000_000, "h"),
        (60_000_000_000, "min"),
        (1_000_000_000, "s"),
    ] {
        if ns >= per && ns % per == 0 {
            return format!("{} {unit}", ns / per);
        }
    }
    if ns == 0 {
        "0 s".to_string()
    } else if ns < 1_000_000_000 && ns % 1_000_000 == 0 {
        format!("{} ms", ns / 1_000_000)
    } else {
        format!("{} s", show_number(d.as_secs_f64()))
    }
}

// ---------------------------------------------------------------------------
// Raw configuration (the file as written)

/// The configuration file as written. Every table refuses unknown keys; values stay
/// text (units, durations) until [`from_str`] validates them into [`Settings`].
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawConfig {
    pub site: String,
    pub topic_prefix: Option<String>,
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
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawBroker {
    pub url: String,
    pub client_id: Option<String>,
    pub protocol: Option<String>,
    pub keep_alive: Option<String>,
    pub session_expiry: Option<String>,
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
pub struct RawJournal {
    pub dir: String,
    pub max_file_bytes: Option<i64>,
    pub max_total_bytes: Option<i64>,
    pub fsync_interval: Option<String>,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawHttp {
    /// `"127.0.0.1:9873"` or `"off"`.
    pub listen: String,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawReactor {
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
}

/// `[reactors.<id>.bed_rise]`: the methanator's bed temperature rise check.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawBedRise {
    /// Tag of the reactor's `[[temperature]]` entry that measures the bed inlet.
    pub inlet_temperature: String,
    /// Design (or measured-elsewhere) inlet CO and CO2, e.g. `{ CO = "0.18 mol%", CO2 = "0.05 mol%" }`.
    pub inlet: Option<BTreeMap<String, String>>,
    /// Alert when the bed rises this much more than the inlet would explain, e.g. `"8 K"`.
    pub alert_above_expected: Option<String>,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawReaction {
    pub equation: String,
    /// Default `species-data`.
    pub k_source: Option<String>,
}

#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawUncertainty {
    pub temperature: Option<String>,
    pub pressure: Option<String>,
    pub composition: Option<String>,
    pub steam_ratio: Option<String>,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawComposition {
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

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawScalar {
    pub tag: Option<String>,
    pub topic: Option<String>,
    pub decoder: Option<String>,
    pub value_pointer: Option<String>,
    pub ts_pointer: Option<String>,
    pub quality_pointer: Option<String>,
    pub unit_pointer: Option<String>,
    pub unit: Option<String>,
    pub max_age: Option<String>,
}

/// A fixed `value`, or a measured ratio (`topic` and the scalar keys; no unit).
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawSteamRatio {
    pub value: Option<f64>,
    pub tag: Option<String>,
    pub topic: Option<String>,
    pub decoder: Option<String>,
    pub value_pointer: Option<String>,
    pub ts_pointer: Option<String>,
    pub quality_pointer: Option<String>,
    pub unit_pointer: Option<String>,
    pub max_age: Option<String>,
}

// ---------------------------------------------------------------------------
// Parsing the file

/// Reads and validates the configuration at `path`; relative paths inside it are
/// taken from the file's folder.
pub fn load(path: &Path) -> Result<Settings, ConfigErrors> {
    let text = fs::read_to_string(path).map_err(|e| {
        ConfigErrors::one(
            "(file)",
            format!("cannot read {}: {}", path.display(), io_reason(&e)),
        )
    })?;
    let base = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p,
        _ => Path::new("."),
    };
    from_str(&text, base)
}

/// Validates configuration text; relative paths inside it are taken from `base_dir`.
/// Secrets named by `password_env` come from the process environment.
pub fn from_str(text: &str, base_dir: &Path) -> Result<Settings, ConfigErrors> {
    from_str_with_env(text, base_dir, &|name: &str| std::env::var(name))
}

/// Looks up an environment variable (injectable for tests).
type EnvLookup<'a> = &'a dyn Fn(&str) -> Result<String, std::env::VarError>;

fn from_str_with_env(
    text: &str,
    base_dir: &Path,
    env: EnvLookup,
) -> Result<Settings, ConfigErrors> {
    let raw = parse_raw(text)?;
    validate(&raw, base_dir, env)
}

/// Line and column (1-based, columns in characters) of a byte offset.
fn line_column(text: &str, offset: usize) -> (usize, usize) {
    let offset = offset.min(text.len());
    let before = text.get(..offset).unwrap_or(text);
    let line = before.matches('\n').count() + 1;
    let line_start = before.rfind('\n').map_or(0, |i| i + 1);
    let column = before.get(line_start..).map_or(0, |s| s.chars().count()) + 1;
    (line, column)
}

/// Serde's type names in words a plant engineer reads.
fn tidy_serde_message(message: &str) -> String {
    message
        .replace("expected i64", "expected a whole number")
        .replace("expected u64", "expected a whole number")
        .replace("expected f64", "expected a number")
        .replace("expected a sequence", "expected an array")
        .replace("expected a map", "expected a table")
        .replace('\n', "; ")
}

fn parse_raw(text: &str) -> Result<RawConfig, ConfigErrors> {
    let tree = DeTable::parse(text).map_err(|e| {
        let at = e.span().map_or(String::new(), |s| {
            let (line, column) = line_column(text, s.start);
            format!("line {line}, column {column}: ")
        });
        ConfigErrors::one(
            "(file)",
            format!("TOML syntax: {at}{}", tidy_serde_message(e.message())),
        )
    })?;
    toml::from_str::<RawConfig>(text).map_err(|e| {
        let message = tidy_serde_message(e.message());
        let span = e.span().unwrap_or(0..0);
        let mut path = if span.is_empty() {
            String::new()
        } else {
            locate(tree.get_ref(), &span).unwrap_or_default()
        };
        // "missing field `x`": point at the missing key itself.
        let message = match message
            .strip_prefix("missing field `")
            .and_then(|m| m.strip_suffix('`'))
        {
            Some(field) => {
                path = key_path(&path, field);
                "missing; this key is required".to_string()
            }
            None if span.is_empty() => message,
            None if message.contains("map, expected an array") => format!(
                "{message}; several tables are written [[...]] with double brackets (line {})",
                line_column(text, span.start).0
            ),
            None => format!("{message} (line {})", line_column(text, span.start).0),
        };
        if path.is_empty() {
            path = "(file)".to_string();
        }
        ConfigErrors::one(path, message)
    })
}

/// The key path of the smallest key or value whose span holds `target`.
fn locate(table: &DeTable, target: &Range<usize>) -> Option<String> {
    let mut best = None;
    walk_table(table, "", target, &mut best);
    best.map(|(_, path)| path)
}

fn consider(
    span: Range<usize>,
    path: &str,
    target: &Range<usize>,
    best: &mut Option<(usize, String)>,
) {
    if span.start <= target.start && target.end <= span.end {
        let len = span.end - span.start;
        // `<=`: a deeper node with the same span (an array element) wins.
        if best.as_ref().is_none_or(|(l, _)| len <= *l) {
            *best = Some((len, path.to_string()));
        }
    }
}

fn walk_table(
    table: &DeTable,
    prefix: &str,
    target: &Range<usize>,
    best: &mut Option<(usize, String)>,
) {
    for (k, v) in table.iter() {
        let path = key_path(prefix, k.get_ref());
        consider(k.span(), &path, target, best);
        walk_value(v, &path, target, best);
    }
}

fn walk_value(
    value: &Spanned<DeValue>,
    path: &str,
    target: &Range<usize>,
    best: &mut Option<(usize, String)>,
) {
    consider(value.span(), path, target, best);
    match value.get_ref() {
        DeValue::Table(t) => walk_table(t, path, target, best),
        DeValue::Array(a) => {
            for (i, item) in a.iter().enumerate() {
                walk_value(item, &format!("{path}[{i}]"), target, best);
            }
        }
        _ => {}
    }
}

// ---------------------------------------------------------------------------
// Validation

fn validate(raw: &RawConfig, base: &Path, env: EnvLookup) -> Result<Settings, ConfigErrors> {
    let mut p = Problems::default();
    if raw.site.is_empty() {
        p.add("site", "is empty; give a short site name, e.g. \"baw1\"");
    } else if !raw.site.chars().all(is_name_char) {
        p.add(
            "site",
            format!(
                "\"{}\" may use only letters, digits, `-` and `_` (it goes into topics)",
                raw.site
            ),
        );
    }
    let topic_prefix = match &raw.topic_prefix {
        None => format!("eqwatch/{}", raw.site),
        Some(t) => {
            if t.is_empty() {
                p.add("topic_prefix", "is empty; e.g. \"eqwatch/baw1\"");
            } else if t.contains(['+', '#']) {
                p.add(
                    "topic_prefix",
                    format!("\"{t}\" contains a wildcard (`+` or `#`); give a plain topic"),
                );
            } else if t.ends_with('/') {
                p.add(
                    "topic_prefix",
                    format!("\"{t}\" ends with `/`; leave it off"),
                );
            } else if t.contains('\0') {
                p.add("topic_prefix", "contains a NUL character");
            }
            t.clone()
        }
    };
    let atmosphere_bar = match &raw.atmosphere {
        None => STANDARD_ATMOSPHERE_BAR,
        Some(text) => atmosphere(&mut p, text),
    };
    let species = species_db(&mut p, &raw.species_files, base);
    let broker = broker(&mut p, &raw.broker, &raw.site, base, env);
    let journal = journal(&mut p, &raw.journal, base);
    let http_listen = match &raw.http {
        None => Some(SocketAddr::from(([127, 0, 0, 1], 9873))),
        Some(h) if h.listen.trim().eq_ignore_ascii_case("off") => None,
        Some(h) => match h.listen.trim().parse::<SocketAddr>() {
            Ok(a) => Some(a),
            Err(_) => {
                p.add(
                    "http.listen",
                    format!(
                        "\"{}\" is not an address and port; expected e.g. \"127.0.0.1:9873\", \"[::1]:9873\" or \"off\"",
                        h.listen
                    ),
                );
                None
            }
        },
    };
    let mut ids: Vec<(&Spanned<String>, &RawReactor)> = raw.reactors.iter().collect();
    ids.sort_by_key(|(k, _)| k.span().start);
    if ids.is_empty() {
        p.add(
            "reactors",
            "no reactors; add at least one [reactors.<id>] table",
        );
    }
    let mut reactors = Vec::with_capacity(ids.len());
    for (id, r) in ids {
        if let Some(settings) = reactor(
            &mut p,
            &species,
            &topic_prefix,
            id.get_ref(),
            r,
            atmosphere_bar,
        ) {
            reactors.push(settings);
        }
    }
    let commands = watch::commands(&mut p, raw.commands.as_ref());
    if !p.is_empty() {
        return Err(p.into_errors());
    }
    Ok(Settings {
        commands,
        site: raw.site.clone(),
        topic_prefix,
        broker,
        journal,
        http_listen,
        atmosphere_bar,
        species,
        reactors,
    })
}

fn atmosphere(p: &mut Problems, text: &str) -> f64 {
    let parsed = split_quantity("atmosphere", text)
        .map_err(|e| e.to_string())
        .and_then(|(v, unit)| {
            if unit.is_empty() {
                return Err(format!(
                    "\"{text}\" has no unit; write it as e.g. \"1.013 bar\""
                ));
            }
            let u = PressureUnit::parse(unit).map_err(|e| unit_message(&e))?;
            if u.gauge {
                return Err(format!(
                    "\"{text}\" is a gauge pressure; the site's barometric pressure is absolute, e.g. \"0.98 bar\""
                ));
            }
            Ok(v * u.bar_per_unit)
        });
    match parsed {
        // A barometer anywhere people build plants: 0.5 bar is above 5000 m altitude.
        Ok(bar) if (0.5..=1.1).contains(&bar) => bar,
        Ok(bar) => {
            p.add(
                "atmosphere",
                format!("{bar} bar is not a barometric pressure; expected 0.5 to 1.1 bar absolute"),
            );
            STANDARD_ATMOSPHERE_BAR
        }
        Err(m) => {
            p.add("atmosphere", m);
            STANDARD_ATMOSPHERE_BAR
        }
    }
}

fn species_db(p: &mut Problems, files: &[String], base: &Path) -> SpeciesDb {
    let mut db = SpeciesDb::builtin();
    for (i, f) in files.iter().enumerate() {
        let path = format!("species_files[{i}]");
        let full = base.join(f);
        match fs::read_to_string(&full) {
            Ok(text) => {
                if let Err(e) = db.merge_toml(&text, f) {
                    p.add(path, e.to_string());
                }
            }
            Err(e) => p.add(
                path,
                format!("cannot read {}: {}", full.display(), io_reason(&e)),
            ),
        }
    }
    db
}

/// Parses a duration at `path`; `None` takes `default`. `min` is the least allowed
/// (zero allowed when `min` is zero).
fn duration_at(
    p: &mut Problems,
    path: &str,
    text: Option<&str>,
    default: Option<Duration>,
    min: Duration,
    why_min: &str,
) -> Duration {
    let d = match (text, default) {
        (Some(t), _) => match parse_duration(t) {
            Ok(d) => d,
            Err(e) => {
                p.add(path, e.to_string());
                return default.unwrap_or(min);
            }
        },
        (None, Some(d)) => return d,
        (None, None) => {
            p.add(path, "missing; give a duration such as \"2 min\"");
            return min;
        }
    };
    if d < min {
        if d.is_zero() {
            p.add(path, format!("must be above zero ({why_min})"));
        } else {
            p.add(
                path,
                format!(
                    "{} is too short; at least {} ({why_min})",
                    show_duration(d),
                    show_duration(min)
                ),
            );
        }
    }
    d
}

const NANOSECOND: Duration = Duration::from_nanos(1);

/// Reads a file that must exist and be readable; returns its full path.
fn readable_file(p: &mut Problems, path: &str, base: &Path, given: &str) -> PathBuf {
    let full = base.join(given);
    if given.is_empty() {
        p.add(path, "is empty; give a file path");
        return full;
    }
    match fs::File::open(&full).and_then(|f| f.metadata()) {
        Ok(m) if m.is_file() => {}
        Ok(_) => p.add(path, format!("{} is not a file", full.display())),
        Err(e) => p.add(
            path,
            format!("cannot read {}: {}", full.display(), io_reason(&e)),
        ),
    }
    full
}

/// `mqtt://host[:port]` or `mqtts://host[:port]`: (tls, host, port).
fn broker_url(p: &mut Problems, url: &str) -> (bool, String, u16) {
    let path = "broker.url";
    let expected =
        "expected mqtt://host[:port] or mqtts://host[:port], e.g. \"mqtt://127.0.0.1:1883\"";
    let written = url.trim();
    let scheme = |name: &str| {
        written
            .get(..name.len())
            .is_some_and(|s| s.eq_ignore_ascii_case(name))
    };
    let (tls, rest) = if scheme("mqtts://") {
        (true, written.get(8..).unwrap_or(""))
    } else if scheme("mqtt://") {
        (false, written.get(7..).unwrap_or(""))
    } else {
        p.add(path, format!("\"{url}\": unknown scheme; {expected}"));
        return (false, String::new(), 1883);
    };
    let default_port = if tls { 8883 } else { 1883 };
    let rest = rest.strip_suffix('/').unwrap_or(rest);
    if rest.contains('@') {
        p.add(
            path,
            format!(
                "\"{url}\" carries user information; give broker.username and password_file or password_env instead"
            ),
        );
        return (tls, String::new(), default_port);
    }
    if rest.contains(['/', '?', '#']) {
        p.add(path, format!("\"{url}\" has a path or query; {expected}"));
        return (tls, String::new(), default_port);
    }
    let (host, port_text) = if let Some(inner) = rest.strip_prefix('[') {
        match inner.split_once(']') {
            Some((h, after)) => match after.strip_prefix(':') {
                Some(port) => (h, Some(port)),
                None if after.is_empty() => (h, None),
                None => {
                    p.add(path, format!("\"{url}\": {expected}"));
                    return (tls, String::new(), default_port);
                }
            },
            None => {
                p.add(path, format!("\"{url}\": `[` without `]`; {expected}"));
                return (tls, String::new(), default_port);
            }
        }
    } else if rest.matches(':').count() > 1 {
        p.add(
            path,
            format!("\"{url}\": write an IPv6 address in brackets, e.g. mqtt://[::1]:1883"),
        );
        return (tls, String::new(), default_port);
    } else {
        match rest.split_once(':') {
            Some((h, port)) => (h, Some(port)),
            None => (rest, None),
        }
    };
    if host.is_empty() || host.contains(char::is_whitespace) {
        p.add(path, format!("\"{url}\" has no host; {expected}"));
    }
    let port = match port_text {
        None => default_port,
        Some(t) => match t.parse::<u16>() {
            Ok(n) if n > 0 => n,
            _ => {
                p.add(
                    path,
                    format!("\"{url}\": port \"{t}\" is not a number from 1 to 65535"),
                );
                default_port
            }
        },
    };
    let host = host.to_string();
    (tls, host, port)
}

fn broker(
    p: &mut Problems,
    raw: &RawBroker,
    site: &str,
    base: &Path,
    env: EnvLookup,
) -> BrokerSettings {
    let (tls, host, port) = broker_url(p, &raw.url);
    let protocol = match raw.protocol.as_deref().map(str::trim) {
        None | Some("3.1.1") | Some("311") => MqttProtocol::V311,
        Some("5") | Some("5.0") => {
            p.add(
                "broker.protocol",
                "MQTT 5 is not supported by this build yet; use \"3.1.1\" (a persistent session comes from session_expiry)",
            );
            MqttProtocol::V5
        }
        Some(other) => {
            p.add(
                "broker.protocol",
                format!("unknown MQTT protocol \"{other}\"; expected \"3.1.1\" or \"5\""),
            );
            MqttProtocol::V311
        }
    };
    let client_id = raw
        .client_id
        .clone()
        .unwrap_or_else(|| format!("eqwatch-{site}"));
    let id_path = "broker.client_id";
    let from_default = if raw.client_id.is_none() {
        " (the default, eqwatch-<site>; set broker.client_id)"
    } else {
        ""
    };
    if client_id.is_empty() {
        p.add(
            id_path,
            "is empty; give the broker a client id, e.g. \"eqwatch-baw1\"",
        );
    } else if protocol == MqttProtocol::V311 && client_id.len() > 23 {
        // MQTT 3.1.1 §3.1.3.1: servers must accept 1 to 23 bytes; longer ids may be refused.
        p.add(
            id_path,
            format!(
                "\"{client_id}\" is {} bytes{from_default}; MQTT 3.1.1 brokers need accept only 1 to 23 (spec 3.1.3.1): shorten it",
                client_id.len()
            ),
        );
    } else if client_id.len() > 65_535 {
        p.add(id_path, "is longer than MQTT allows (65535 bytes)");
    }
    // rumqttc 0.25.1 asserts keep-alive >= 5 s for MQTT 5 (src/v5/mod.rs
    // `MqttOptions::set_keep_alive`) and sends whole seconds as u16 in both protocols
    // (src/eventloop.rs, src/v5/eventloop.rs: `as_secs() as u16`).
    let keep_alive = duration_at(
        p,
        "broker.keep_alive",
        raw.keep_alive.as_deref(),
        Some(Duration::from_secs(30)),
        Duration::from_secs(5),
        "the MQTT client refuses keep-alives under 5 s",
    );
    if keep_alive.subsec_nanos() != 0 {
        p.add(
            "broker.keep_alive",
            format!(
                "{} is not a whole number of seconds (MQTT counts keep-alive in seconds)",
                show_duration(keep_alive)
            ),
        );
    } else if keep_alive.as_secs() > u64::from(u16::MAX) {
        p.add(
            "broker.keep_alive",
            format!(
                "{} is above the MQTT limit of 65535 s",
                show_duration(keep_alive)
            ),
        );
    }
    let session_expiry = duration_at(
        p,
        "broker.session_expiry",
        raw.session_expiry.as_deref(),
        Some(Duration::ZERO),
        Duration::ZERO,
        "",
    );
    if session_expiry.subsec_nanos() != 0 {
        p.add(
            "broker.session_expiry",
            format!(
                "{} is not a whole number of seconds",
                show_duration(session_expiry)
            ),
        );
    } else if session_expiry.as_secs() > u64::from(u32::MAX) {
        // MQTT 5 §3.1.2.11.2: a four-byte interval in seconds.
        p.add(
            "broker.session_expiry",
            format!(
                "{} is above the MQTT limit of 4294967295 s",
                show_duration(session_expiry)
            ),
        );
    }
    let username = match &raw.username {
        Some(u) if u.is_empty() => {
            p.add(
                "broker.username",
                "is empty; give the user name or remove the key",
            );
            None
        }
        other => other.clone(),
    };
    let password = match (&raw.password_file, &raw.password_env) {
        (Some(_), Some(_)) => {
            p.add(
                "broker.password_env",
                "give password_file or password_env, not both",
            );
            None
        }
        (Some(file), None) => {
            let full = base.join(file);
            match fs::read_to_string(&full) {
                Ok(text) => {
                    let secret = text.trim_end_matches(['\r', '\n']).to_string();
                    if secret.is_empty() {
                        p.add(
                            "broker.password_file",
                            format!("{} is empty", full.display()),
                        );
                    }
                    Some(secret)
                }
                Err(e) => {
                    p.add(
                        "broker.password_file",
                        format!("cannot read {}: {}", full.display(), io_reason(&e)),
                    );
                    None
                }
            }
        }
        (None, Some(var)) => {
            if var.is_empty() || var.contains(['=', '\0']) {
                p.add(
                    "broker.password_env",
                    format!("\"{var}\" is not an environment variable name"),
                );
                None
            } else {
                match env(var) {
                    Ok(secret) if secret.is_empty() => {
                        p.add(
                            "broker.password_env",
                            format!("environment variable {var} is empty"),
                        );
                        None
                    }
                    Ok(secret) => Some(secret),
                    Err(std::env::VarError::NotPresent) => {
                        p.add(
                            "broker.password_env",
                            format!("environment variable {var} is not set"),
                        );
                        None
                    }
                    Err(std::env::VarError::NotUnicode(_)) => {
                        p.add(
                            "broker.password_env",
                            format!("environment variable {var} is not valid UTF-8"),
                        );
                        None
                    }
                }
            }
        }
        (None, None) => None,
    };
    let has_password = raw.password_file.is_some() || raw.password_env.is_some();
    if has_password && raw.username.is_none() && protocol == MqttProtocol::V311 {
        // MQTT 3.1.1 §3.1.2.9: the password flag needs the user name flag.
        p.add(
            "broker.username",
            "missing; MQTT 3.1.1 sends a password only with a user name",
        );
    }
    let mut tls_file = |key: &str, given: &Option<String>| -> Option<PathBuf> {
        let given = given.as_ref()?;
        let path = format!("broker.{key}");
        if !tls {
            p.add(
                path,
                "only for an mqtts:// broker url; remove it or use mqtts://",
            );
            return None;
        }
        Some(readable_file(p, &path, base, given))
    };
    let ca_file = tls_file("ca_file", &raw.ca_file);
    let client_cert_file = tls_file("client_cert_file", &raw.client_cert_file);
    let client_key_file = tls_file("client_key_file", &raw.client_key_file);
    if tls {
        match (&raw.client_cert_file, &raw.client_key_file) {
            (Some(_), None) => p.add(
                "broker.client_key_file",
                "missing; a client certificate needs its key",
            ),
            (None, Some(_)) => p.add(
                "broker.client_cert_file",
                "missing; a client key needs its certificate",
            ),
            _ => {}
        }
    }
    const MIN_PACKET: i64 = 1024;
    const MAX_PACKET: i64 = 256 * 1024 * 1024;
    let max_packet_bytes = match raw.max_packet_bytes {
        None => 256 * 1024,
        Some(n) if (MIN_PACKET..=MAX_PACKET).contains(&n) => n as usize,
        Some(n) => {
            p.add(
                "broker.max_packet_bytes",
                format!(
                    "{n} is outside 1024 (1 KiB) to 268435456 (256 MiB, the MQTT packet limit)"
                ),
            );
            256 * 1024
        }
    };
    let reconnect_min = duration_at(
        p,
        "broker.reconnect_min",
        raw.reconnect_min.as_deref(),
        Some(Duration::from_millis(250)),
        NANOSECOND,
        "a zero wait would reconnect in a tight loop",
    );
    let reconnect_max = duration_at(
        p,
        "broker.reconnect_max",
        raw.reconnect_max.as_deref(),
        Some(Duration::from_secs(30)),
        NANOSECOND,
        "a zero wait would reconnect in a tight loop",
    );
    if reconnect_min > reconnect_max {
        p.add(
            "broker.reconnect_min",
            format!(
                "{} is above reconnect_max ({}); the first wait must not exceed the longest",
                show_duration(reconnect_min),
                show_duration(reconnect_max)
            ),
        );
    }
    let inflight = match raw.inflight {
        None => 64,
        Some(n) => match u16::try_from(n) {
            Ok(v) if v > 0 => v,
            _ => {
                p.add(
                    "broker.inflight",
                    format!("{n} is outside 1 to 65535 (MQTT packet ids are 16-bit)"),
                );
                64
            }
        },
    };
    BrokerSettings {
        host,
        port,
        tls,
        client_id,
        protocol,
        keep_alive,
        session_expiry,
        username,
        password,
        ca_file,
        client_cert_file,
        client_key_file,
        max_packet_bytes,
        reconnect_min,
        reconnect_max,
        inflight,
    }
}

fn journal(p: &mut Problems, raw: &RawJournal, base: &Path) -> JournalSettings {
    if raw.dir.trim().is_empty() {
        p.add(
            "journal.dir",
            "is empty; give a folder, e.g. \"var/journal\"",
        );
    }
    const MIN_FILE: i64 = 4096;
    let max_file_bytes = match raw.max_file_bytes {
        None => 16 * 1024 * 1024,
        Some(n) if n >= MIN_FILE => n,
        Some(n) => {
            p.add(
                "journal.max_file_bytes",
                format!("{n} is below 4096 bytes; a journal file holds many records"),
            );
            MIN_FILE
        }
    };
    let max_total_bytes = match raw.max_total_bytes {
        None => (256 * 1024 * 1024).max(max_file_bytes),
        Some(n) if n >= max_file_bytes => n,
        Some(n) => {
            p.add(
                "journal.max_total_bytes",
                format!("{n} is below journal.max_file_bytes ({max_file_bytes})"),
            );
            max_file_bytes
        }
    };
    let fsync_interval = duration_at(
        p,
        "journal.fsync_interval",
        raw.fsync_interval.as_deref(),
        Some(Duration::from_secs(1)),
        NANOSECOND,
        "write \"1 s\" or similar",
    );
    JournalSettings {
        dir: base.join(&raw.dir),
        // Both were checked positive above.
        max_file_bytes: max_file_bytes.unsigned_abs(),
        max_total_bytes: max_total_bytes.unsigned_abs(),
        fsync_interval,
    }
}

// ---------------------------------------------------------------------------
// Reactors

/// Checks a JSON Pointer (RFC 6901 §3). `optional`: `""` means "not read" and gives
/// `None`; otherwise `""` is the whole document.
fn pointer(
    p: &mut Problems,
    path: String,
    given: Option<&str>,
    default: &str,
    optional: bool,
) -> Option<String> {
    let text = given.unwrap_or(default);
    if optional && text.is_empty() {
        return None;
    }
    if !text.is_empty() && !text.starts_with('/') {
        p.add(
            path,
            format!("\"{text}\" is not a JSON Pointer (RFC 6901); it starts with `/`, e.g. \"{default}\""),
        );
        return Some(default.to_string());
    }
    let bad_escape = text
        .match_indices('~')
        .any(|(i, _)| !matches!(text.as_bytes().get(i + 1), Some(b'0' | b'1')));
    if bad_escape {
        p.add(
            path,
            format!("\"{text}\": `~` must be written ~0, and `/` inside a name ~1 (RFC 6901)"),
        );
    }
    Some(text.to_string())
}

/// The pointer keys of a scalar message, by name, for messages about them.
struct PointerKeys<'a> {
    value: Option<&'a str>,
    ts: Option<&'a str>,
    quality: Option<&'a str>,
    unit: Option<&'a str>,
}

fn decoder(p: &mut Problems, path: &str, name: Option<&str>, keys: PointerKeys) -> ScalarDecoder {
    let name = name.unwrap_or("json").trim().to_ascii_lowercase();
    match name.as_str() {
        "json" => ScalarDecoder::Json {
            value_pointer: pointer(
                p,
                format!("{path}.value_pointer"),
                keys.value,
                "/value",
                false,
            )
            .unwrap_or_else(|| "/value".to_string()),
            ts_pointer: pointer(p, format!("{path}.ts_pointer"), keys.ts, "/ts", true),
            quality_pointer: pointer(
                p,
                format!("{path}.quality_pointer"),
                keys.quality,
                "/quality",
                true,
            ),
            unit_pointer: pointer(p, format!("{path}.unit_pointer"), keys.unit, "/unit", true),
        },
        "number" => {
            for (key, given) in [
                ("value_pointer", keys.value),
                ("ts_pointer", keys.ts),
                ("quality_pointer", keys.quality),
                ("unit_pointer", keys.unit),
            ] {
                if given.is_some() {
                    p.add(
                        format!("{path}.{key}"),
                        "only with decoder = \"json\"; a \"number\" payload is the bare value",
                    );
                }
            }
            ScalarDecoder::Number
        }
        _ => {
            p.add(
                format!("{path}.decoder"),
                format!("unknown decoder \"{name}\"; expected \"json\" or \"number\""),
            );
            ScalarDecoder::Number
        }
    }
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum ScalarKind {
    Temperature,
    Pressure,
    Ratio,
}

/// The keys of one scalar input, from a temperature, pressure or steam-ratio table.
struct ScalarFields<'a> {
    tag: Option<&'a str>,
    topic: Option<&'a str>,
    decoder: Option<&'a str>,
    pointers: PointerKeys<'a>,
    unit: Option<&'a str>,
    max_age: Option<&'a str>,
}

impl<'a> From<&'a RawScalar> for ScalarFields<'a> {
    fn from(r: &'a RawScalar) -> Self {
        Self {
            tag: r.tag.as_deref(),
            topic: r.topic.as_deref(),
            decoder: r.decoder.as_deref(),
            pointers: PointerKeys {
                value: r.value_pointer.as_deref(),
                ts: r.ts_pointer.as_deref(),
                quality: r.quality_pointer.as_deref(),
                unit: r.unit_pointer.as_deref(),
            },
            unit: r.unit.as_deref(),
            max_age: r.max_age.as_deref(),
        }
    }
}

impl<'a> From<&'a RawSteamRatio> for ScalarFields<'a> {
    fn from(r: &'a RawSteamRatio) -> Self {
        Self {
            tag: r.tag.as_deref(),
            topic: r.topic.as_deref(),
            decoder: r.decoder.as_deref(),
            pointers: PointerKeys {
                value: r.value_pointer.as_deref(),
                ts: r.ts_pointer.as_deref(),
                quality: r.quality_pointer.as_deref(),
                unit: r.unit_pointer.as_deref(),
            },
            unit: None,
            max_age: r.max_age.as_deref(),
        }
    }
}

fn scalar(p: &mut Problems, path: &str, f: ScalarFields, kind: ScalarKind) -> ScalarSettings {
    let topic = match f.topic {
        Some(t) => t.to_string(),
        None => {
            p.add(
                format!("{path}.topic"),
                "missing; give the topic the instrument publishes to",
            );
            String::new()
        }
    };
    let tag = match f.tag {
        Some(t) if t.trim().is_empty() => {
            p.add(format!("{path}.tag"), "is empty; give the instrument tag");
            String::new()
        }
        Some(t) => t.trim().to_string(),
        None => topic.clone(),
    };
    let decoder = decoder(p, path, f.decoder, f.pointers);
    let unit_path = format!("{path}.unit");
    let unit = match (kind, f.unit) {
        (ScalarKind::Temperature, None) => {
            p.add(
                unit_path,
                "missing; give the unit the instrument sends, e.g. \"degC\" or \"K\"",
            );
            ScalarUnit::Temperature(TemperatureUnit::Kelvin)
        }
        (ScalarKind::Temperature, Some(u)) => match TemperatureUnit::parse(u) {
            Ok(t) => ScalarUnit::Temperature(t),
            Err(e) => {
                p.add(unit_path, unit_message(&e));
                ScalarUnit::Temperature(TemperatureUnit::Kelvin)
            }
        },
        (ScalarKind::Pressure, None) => {
            p.add(
                unit_path,
                "missing; give the unit with its reference, e.g. \"barg\" (gauge) or \"bara\" (absolute)",
            );
            ScalarUnit::Pressure(PressureUnit {
                bar_per_unit: 1.0,
                gauge: false,
            })
        }
        (ScalarKind::Pressure, Some(u)) => match PressureUnit::parse(u) {
            Ok(pu) => ScalarUnit::Pressure(pu),
            Err(e) => {
                p.add(unit_path, unit_message(&e));
                ScalarUnit::Pressure(PressureUnit {
                    bar_per_unit: 1.0,
                    gauge: false,
                })
            }
        },
        (ScalarKind::Ratio, _) => ScalarUnit::Ratio,
    };
    let max_age = duration_at(
        p,
        &format!("{path}.max_age"),
        f.max_age,
        None,
        NANOSECOND,
        "a reading is stale after this",
    );
    ScalarSettings {
        tag,
        topic,
        decoder,
        unit,
        max_age,
    }
}

/// The longest common `/`-separated prefix of some topics (a default tag).
fn common_topic_prefix<'a>(topics: impl Iterator<Item = &'a str>) -> String {
    let mut prefix: Option<Vec<&str>> = None;
    for t in topics {
        let levels: Vec<&str> = t.split('/').collect();
        prefix = Some(match prefix {
            None => levels,
            Some(p) => p
                .iter()
                .zip(&levels)
                .take_while(|(a, b)| a == b)
                .map(|(a, _)| *a)
                .collect(),
        });
    }
    prefix.unwrap_or_default().join("/")
}

fn composition(
    p: &mut Problems,
    db: &SpeciesDb,
    reactor_path: &str,
    raw: &RawComposition,
    basis: Option<Basis>,
) -> Option<(AnalysisSpec, CompositionSource, Vec<usize>)> {
    let path = format!("{reactor_path}.composition");
    let start = p.len();
    let unit = match raw.unit.as_deref() {
        None => CompositionUnit::Percent,
        Some(u) => CompositionUnit::parse(u).unwrap_or_else(|e| {
            p.add(format!("{path}.unit"), unit_message(&e));
            CompositionUnit::Percent
        }),
    };
    let water = db.index_of("H2O");
    let mut species: Vec<usize> = Vec::new();
    if raw.components.is_empty() {
        p.add(
            format!("{path}.components"),
            "no components; list the species the analyser reports, e.g. [\"H2\", \"N2\", \"CO\"]",
        );
    }
    for (i, c) in raw.components.iter().enumerate() {
        let ipath = format!("{path}.components[{i}]");
        match db.index_of(c.trim()) {
            None => p.add(
                ipath,
                format!("unknown species \"{c}\"{}", unknown_hint(db, c.trim())),
            ),
            Some(s) if species.contains(&s) => {
                p.add(ipath, format!("{} is listed twice", db.get(s).name));
            }
            Some(s) => {
                if basis == Some(Basis::Dry) && Some(s) == water {
                    p.add(
                        ipath,
                        "H2O on a dry-basis analysis; a dry analyser sees the gas after its water is knocked out: remove H2O and give the water as steam_ratio",
                    );
                }
                species.push(s);
            }
        }
    }
    let names: Vec<String> = species.iter().map(|&s| db.get(s).name.clone()).collect();
    let scalar_keys = PointerKeys {
        value: raw.value_pointer.as_deref(),
        ts: raw.ts_pointer.as_deref(),
        quality: raw.quality_pointer.as_deref(),
        unit: raw.unit_pointer.as_deref(),
    };
    let source = match (&raw.topic, &raw.topics) {
        (Some(_), Some(_)) => {
            p.add(
                path.clone(),
                "give topic (one analyser message with every component) or topics (one topic per component), not both",
            );
            None
        }
        (None, None) => {
            p.add(
                format!("{path}.topic"),
                "missing; give topic = \"...\" (one message with every component) or topics = { H2 = \"...\", ... } (one per component)",
            );
            None
        }
        (Some(topic), None) => {
            for (key, given) in [
                ("decoder", &raw.decoder),
                ("value_pointer", &raw.value_pointer),
            ] {
                if given.is_some() {
                    p.add(
                        format!("{path}.{key}"),
                        "only with topics (one topic per component); an analyser message is JSON with values_pointer",
                    );
                }
            }
            Some(CompositionSource::Analyser {
                topic: topic.clone(),
                values_pointer: pointer(
                    p,
                    format!("{path}.values_pointer"),
                    raw.values_pointer.as_deref(),
                    "/values",
                    false,
                )
                .unwrap_or_else(|| "/values".to_string()),
                ts_pointer: pointer(p, format!("{path}.ts_pointer"), scalar_keys.ts, "/ts", true),
                unit_pointer: pointer(
                    p,
                    format!("{path}.unit_pointer"),
                    scalar_keys.unit,
                    "/unit",
                    true,
                ),
                basis_pointer: pointer(
                    p,
                    format!("{path}.basis_pointer"),
                    raw.basis_pointer.as_deref(),
                    "/basis",
                    true,
                ),
                quality_pointer: pointer(
                    p,
                    format!("{path}.quality_pointer"),
                    scalar_keys.quality,
                    "/quality",
                    true,
                ),
            })
        }
        (None, Some(map)) => {
            for (key, given) in [
                ("values_pointer", &raw.values_pointer),
                ("basis_pointer", &raw.basis_pointer),
            ] {
                if given.is_some() {
                    p.add(
                        format!("{path}.{key}"),
                        "only with topic (one analyser message with every component)",
                    );
                }
            }
            let decoder = decoder(p, &path, raw.decoder.as_deref(), scalar_keys);
            let mut by_species: Vec<(usize, &String)> = Vec::new();
            for (name, topic) in map {
                let kpath = key_path(&format!("{path}.topics"), name);
                match db.index_of(name.trim()) {
                    None => p.add(
                        kpath,
                        format!(
                            "unknown species \"{name}\"{}",
                            unknown_hint(db, name.trim())
                        ),
                    ),
                    Some(s) if by_species.iter().any(|(x, _)| *x == s) => {
                        p.add(kpath, format!("{} has two topics", db.get(s).name));
                    }
                    Some(s) if !species.contains(&s) => p.add(
                        kpath,
                        format!(
                            "{} is not in {path}.components; add it there or remove its topic",
                            db.get(s).name
                        ),
                    ),
                    Some(s) => by_species.push((s, topic)),
                }
            }
            let mut topics = Vec::with_capacity(species.len());
            for (&s, name) in species.iter().zip(&names) {
                match by_species.iter().find(|(x, _)| *x == s) {
                    Some((_, t)) => topics.push((name.clone(), (*t).clone())),
                    None => p.add(
                        format!("{path}.topics"),
                        format!("no topic for {name}; every component needs one"),
                    ),
                }
            }
            Some(CompositionSource::PerComponent { topics, decoder })
        }
    };
    let tag = match (&raw.tag, &source) {
        (Some(t), _) if t.trim().is_empty() => {
            p.add(format!("{path}.tag"), "is empty; give the analyser tag");
            String::new()
        }
        (Some(t), _) => t.trim().to_string(),
        (None, Some(CompositionSource::Analyser { topic, .. })) => topic.clone(),
        (None, Some(CompositionSource::PerComponent { topics, .. })) => {
            common_topic_prefix(topics.iter().map(|(_, t)| t.as_str()))
        }
        (None, None) => String::new(),
    };
    let sum_tolerance = match raw.sum_tolerance.as_deref() {
        None => 0.02,
        Some(text) => sum_tolerance(p, &format!("{path}.sum_tolerance"), text),
    };
    let lag = duration_at(
        p,
        &format!("{path}.lag"),
        raw.lag.as_deref(),
        Some(Duration::ZERO),
        Duration::ZERO,
        "",
    );
    let max_age = duration_at(
        p,
        &format!("{path}.max_age"),
        raw.max_age.as_deref(),
        None,
        NANOSECOND,
        "an analysis is stale after this",
    );
    let mut detection_limits = vec![None; names.len()];
    for (sp, text) in raw.detection_limits.iter().flatten() {
        let key = key_path(&format!("{path}.detection_limits"), sp);
        let Some(i) = names.iter().position(|n| n.eq_ignore_ascii_case(sp.trim())) else {
            p.add(
                key,
                format!(
                    "\"{sp}\" is not one of this analyser's components ({})",
                    names.join(", ")
                ),
            );
            continue;
        };
        match composition_amount("detection limit", text) {
            Ok(f) if f > 0.0 && f < 1.0 => detection_limits[i] = Some(f),
            Ok(_) => p.add(
                key,
                format!("\"{text}\" must be above zero and below 100 mol%"),
            ),
            Err(m) => p.add(key, m),
        }
    }
    let (Some(source), Some(basis)) = (source, basis) else {
        return None;
    };
    if p.len() > start {
        return None;
    }
    let delivery = match source {
        CompositionSource::Analyser { .. } => Delivery::Whole,
        CompositionSource::PerComponent { .. } => Delivery::PerComponent,
    };
    Some((
        AnalysisSpec {
            tag,
            delivery,
            unit,
            basis,
            components: names,
            sum_tolerance,
            lag,
            max_age,
            detection_limits,
        },
        source,
        species,
    ))
}

/// An amount of a component such as `"2 mol%"` or `"0.5 ppm"`, as a mole fraction.
fn composition_amount(what: &'static str, text: &str) -> Result<f64, String> {
    split_quantity(what, text)
        .map_err(|e| e.to_string())
        .and_then(|(v, unit)| {
            if unit.is_empty() {
                return Err(format!(
                    "\"{text}\" has no unit; write e.g. \"2 mol%\" or \"0.5 ppm\""
                ));
            }
            let u = CompositionUnit::parse(unit).map_err(|e| unit_message(&e))?;
            Ok(v * u.fraction_per_unit())
        })
}

fn sum_tolerance(p: &mut Problems, path: &str, text: &str) -> f64 {
    let parsed = composition_amount("sum tolerance", text);
    match parsed {
        Ok(f) if (0.0..1.0).contains(&f) => f,
        Ok(_) => {
            p.add(path, format!("\"{text}\" is outside 0 to 100 mol%"));
            0.02
        }
        Err(m) => {
            p.add(path, m);
            0.02
        }
    }
}

/// Kelvin per degree of a temperature difference unit.
fn kelvin_per_degree(unit: &str) -> Option<f64> {
    match unit.trim().to_ascii_lowercase().as_str() {
        "k" | "degc" | "°c" | "c" => Some(1.0),
        "degf" | "°f" | "f" | "degr" | "°r" => Some(5.0 / 9.0),
        _ => None,
    }
}

fn transient(p: &mut Problems, path: &str, text: &str) -> f64 {
    let expected = "expected a rate such as \"2 K/min\" (K, degC or degF per s, min or h)";
    let rate = split_quantity("transient", text)
        .ok()
        .and_then(|(v, unit)| {
            let (deg, time) = unit.split_once('/')?;
            let per_min = match time.trim().to_ascii_lowercase().as_str() {
                "s" | "sec" => 60.0,
                "min" => 1.0,
                "h" | "hr" => 1.0 / 60.0,
                _ => return None,
            };
            Some(v * kelvin_per_degree(deg)? * per_min)
        });
    match rate {
        Some(r) if r > 0.0 && r.is_finite() => r,
        Some(_) => {
            p.add(path, format!("\"{text}\" must be above zero"));
            2.0
        }
        None => {
            p.add(path, format!("\"{text}\": {expected}"));
            2.0
        }
    }
}

fn uncertainty(p: &mut Problems, path: &str, raw: Option<&RawUncertainty>) -> Uncertainty {
    let mut u = Uncertainty::default();
    let Some(raw) = raw else {
        return u;
    };
    let mut item = |key: &str,
                    text: &Option<String>,
                    convert: &dyn Fn(&str) -> Option<f64>,
                    example: &str|
     -> f64 {
        let Some(text) = text else {
            return 0.0;
        };
        let kpath = format!("{path}.{key}");
        match split_quantity("uncertainty", text) {
            Ok((v, unit)) if v >= 0.0 => match convert(unit) {
                Some(factor) => v * factor,
                None => {
                    p.add(
                        kpath,
                        format!("\"{text}\": unit \"{unit}\" is not understood; write e.g. \"{example}\""),
                    );
                    0.0
                }
            },
            Ok(_) => {
                p.add(
                    kpath,
                    format!("\"{text}\" is negative; a ± half-width is zero or more"),
                );
                0.0
            }
            Err(_) => {
                p.add(
                    kpath,
                    format!("\"{text}\" is not a number with a unit; write e.g. \"{example}\""),
                );
                0.0
            }
        }
    };
    let pressure_bar_per_unit = |unit: &str| -> Option<f64> {
        // A difference: gauge and absolute units agree; `psi` alone is fine here.
        match PressureUnit::parse(unit) {
            Ok(pu) => Some(pu.bar_per_unit),
            Err(UnitError::Ambiguous { .. }) => PressureUnit::parse(&format!("{unit}a"))
                .ok()
                .map(|pu| pu.bar_per_unit),
            Err(_) => None,
        }
    };
    let percent = |unit: &str| (unit.trim() == "%").then_some(0.01);
    u.temperature_k = item("temperature", &raw.temperature, &kelvin_per_degree, "2 K");
    u.pressure_bar = item("pressure", &raw.pressure, &pressure_bar_per_unit, "0.2 bar");
    u.composition_rel = item("composition", &raw.composition, &percent, "2 %");
    u.steam_ratio_rel = item("steam_ratio", &raw.steam_ratio, &percent, "5 %");
    u
}

/// Default key component: the first reaction's single product where there is one
/// (NH3, CH3OH), else its first reactant as written (CH4 at a reformer, CO at a shift).
fn default_key(r: &Reaction) -> usize {
    let products: Vec<usize> = r
        .species
        .iter()
        .zip(&r.nu)
        .filter(|(_, nu)| **nu > 0.0)
        .map(|(s, _)| *s)
        .collect();
    match products.as_slice() {
        [one] => *one,
        _ => r.species.first().copied().unwrap_or_default(),
    }
}

fn check_topic(p: &mut Problems, path: &str, topic: &str, output_prefix: &str) {
    if topic.is_empty() {
        p.add(path, "is empty; give the topic the instrument publishes to");
    } else if topic.contains(['+', '#']) {
        p.add(
            path,
            format!(
                "\"{topic}\" contains a wildcard (`+` or `#`); give the one topic this input is published on"
            ),
        );
    } else if topic.contains('\0') {
        p.add(path, "contains a NUL character");
    } else if topic.len() > 65_535 {
        p.add(path, "is longer than MQTT allows (65535 bytes)");
    } else if topic.trim() != topic {
        p.add(
            path,
            format!("\"{topic}\" starts or ends with a space; remove it"),
        );
    } else if topic == output_prefix
        || topic
            .strip_prefix(output_prefix)
            .is_some_and(|rest| rest.starts_with('/'))
    {
        p.add(
            path,
            format!(
                "\"{topic}\" lies under eqwatch's own output prefix \"{output_prefix}\"; eqwatch would read its own results"
            ),
        );
    }
}

fn model_error_path(reactor_path: &str, e: &ModelError) -> String {
    match e {
        ModelError::MissingSpecies { .. } => format!("{reactor_path}.composition.components"),
        ModelError::Eos(inner) => equilibrium_error_path(reactor_path, inner),
        ModelError::NoReaction => format!("{reactor_path}.reactions"),
    }
}

fn equilibrium_error_path(reactor_path: &str, e: &EquilibriumError) -> String {
    match e {
        EquilibriumError::NoCriticalConstants { .. } | EquilibriumError::Eos(_) => {
            format!("{reactor_path}.eos")
        }
        EquilibriumError::IncompleteReactions { .. }
        | EquilibriumError::DependentReactions { .. }
        | EquilibriumError::Empty => format!("{reactor_path}.reactions"),
    }
}

fn reactor(
    p: &mut Problems,
    db: &SpeciesDb,
    output_prefix: &str,
    id: &str,
    raw: &RawReactor,
    atmosphere_bar: f64,
) -> Option<ReactorSettings> {
    let path = key_path("reactors", id);
    let start = p.len();
    if id.is_empty() || !id.chars().all(is_name_char) {
        p.add(
            path.clone(),
            format!("reactor id \"{id}\" may use only letters, digits, `-` and `_` (it goes into topics)"),
        );
    }
    let name = match &raw.name {
        None => id.to_string(),
        Some(n) if n.trim().is_empty() => {
            p.add(
                format!("{path}.name"),
                "is empty; give a readable name or remove the key",
            );
            String::new()
        }
        Some(n) => n.trim().to_string(),
    };

    // Reactions and their K sources.
    let reactions_start = p.len();
    let mut reactions: Vec<(Reaction, KModel)> = Vec::with_capacity(raw.reactions.len());
    if raw.reactions.is_empty() {
        p.add(
            format!("{path}.reactions"),
            "no reactions; give at least one, e.g. [{ equation = \"CO + H2O = CO2 + H2\" }]",
        );
    }
    for (i, r) in raw.reactions.iter().enumerate() {
        let rpath = format!("{path}.reactions[{i}]");
        let reaction = parse_reaction(&r.equation, db);
        let source = match r.k_source.as_deref() {
            None => Ok(KSourceId::SpeciesData),
            Some(s) => KSourceId::parse(s),
        };
        let source = source.map_err(|e| p.add(format!("{rpath}.k_source"), e.to_string()));
        let reaction = match reaction {
            Ok(r) => r,
            Err(e) => {
                p.add(format!("{rpath}.equation"), e.to_string());
                continue;
            }
        };
        let Ok(source) = source else {
            continue;
        };
        match KModel::from_correlation(source, &reaction, db) {
            Ok(k) => reactions.push((reaction, k)),
            Err(e) => p.add(format!("{rpath}.k_source"), e.to_string()),
        }
    }
    let reactions_ok = p.len() == reactions_start;

    let eos = match raw.eos.as_deref() {
        None => EosKind::Ideal,
        Some(s) => EosKind::parse(s).unwrap_or_else(|| {
            p.add(
                format!("{path}.eos"),
                format!(
                    "unknown equation of state \"{s}\"; expected \"ideal\" or \"peng-robinson\""
                ),
            );
            EosKind::Ideal
        }),
    };
    let band_ln = match raw.band {
        None => DEFAULT_BAND_LN,
        Some(b) if b.is_finite() && b >= 0.0 => b,
        Some(b) => {
            p.add(
                format!("{path}.band"),
                format!("{b} must be a number zero or more (a band of |ln(Q/K)|, e.g. 0.01)"),
            );
            DEFAULT_BAND_LN
        }
    };
    let transient_k_per_min = match raw.transient.as_deref() {
        None => 2.0,
        Some(t) => transient(p, &format!("{path}.transient"), t),
    };
    let uncertainty = uncertainty(p, &format!("{path}.uncertainty"), raw.uncertainty.as_ref());

    // The analysis.
    let cpath = format!("{path}.composition");
    let basis = match raw.composition.basis.as_deref() {
        None => {
            p.add(
                format!("{cpath}.basis"),
                "missing; give \"dry\" (water knocked out before the analyser) or \"wet\"",
            );
            None
        }
        Some(b) => {
            let parsed = Basis::parse(b);
            if parsed.is_none() {
                p.add(
                    format!("{cpath}.basis"),
                    format!("unknown basis \"{b}\"; expected \"dry\" or \"wet\""),
                );
            }
            parsed
        }
    };
    let composition = composition(p, db, &path, &raw.composition, basis);

    // Scalar inputs.
    if raw.temperature.is_empty() {
        p.add(
            format!("{path}.temperature"),
            format!("no thermocouple; add at least one [[{path}.temperature]] table"),
        );
    }
    let temperatures: Vec<ScalarSettings> = raw
        .temperature
        .iter()
        .enumerate()
        .map(|(i, t)| {
            scalar(
                p,
                &format!("{path}.temperature[{i}]"),
                t.into(),
                ScalarKind::Temperature,
            )
        })
        .collect();
    let pressure = scalar(
        p,
        &format!("{path}.pressure"),
        (&raw.pressure).into(),
        ScalarKind::Pressure,
    );
    let spath = format!("{path}.steam_ratio");
    let steam_ratio = match (basis, &raw.steam_ratio) {
        (Some(Basis::Dry), None) => {
            p.add(
                spath.clone(),
                "missing; a dry-basis analysis needs the steam-to-dry-gas ratio: value = 0.5 (fixed) or topic = \"...\" (measured)",
            );
            None
        }
        (Some(Basis::Wet), Some(_)) => {
            p.add(
                spath.clone(),
                "only for basis = \"dry\"; a wet analysis already contains its water",
            );
            None
        }
        (Some(Basis::Dry), Some(s)) => steam_ratio(p, &spath, s),
        _ => None,
    };

    // Topics: valid, and no two inputs of this reactor on one topic.
    let mut topics: Vec<(String, &str)> = Vec::new();
    if let Some(t) = &raw.composition.topic {
        topics.push((format!("{cpath}.topic"), t));
    }
    for (name, t) in raw.composition.topics.iter().flatten() {
        topics.push((key_path(&format!("{cpath}.topics"), name), t));
    }
    for (i, t) in raw.temperature.iter().enumerate() {
        if let Some(t) = &t.topic {
            topics.push((format!("{path}.temperature[{i}].topic"), t));
        }
    }
    if let Some(t) = &raw.pressure.topic {
        topics.push((format!("{path}.pressure.topic"), t));
    }
    if let Some(t) = raw.steam_ratio.as_ref().and_then(|s| s.topic.as_ref()) {
        topics.push((format!("{spath}.topic"), t));
    }
    for (i, (tpath, topic)) in topics.iter().enumerate() {
        check_topic(p, tpath, topic, output_prefix);
        if let Some((first, _)) = topics[..i].iter().find(|(_, t)| t == topic) {
            p.add(
                tpath.clone(),
                format!("\"{topic}\" is also {first}; two inputs of one reactor need two topics"),
            );
        }
    }

    // Key component.
    let key_component = match (&raw.key_component, reactions.first()) {
        (Some(k), _) => match db.index_of(k.trim()) {
            None => {
                p.add(
                    format!("{path}.key_component"),
                    format!("unknown species \"{k}\"{}", unknown_hint(db, k.trim())),
                );
                None
            }
            Some(s) if reactions_ok && !reactions.iter().any(|(r, _)| r.species.contains(&s)) => {
                p.add(
                    format!("{path}.key_component"),
                    format!("{} is not a species of the reactions", db.get(s).name),
                );
                None
            }
            Some(s) => Some(s),
        },
        (None, Some((r, _))) => Some(default_key(r)),
        (None, None) => None,
    };

    // The gas and the models.
    let mut model = None;
    let mut equilibrium = None;
    if let (true, Some((comp, _, species))) = (reactions_ok, &composition) {
        let mut gas = species.clone();
        if comp.basis == Basis::Dry {
            match db.index_of("H2O") {
                Some(w) => gas.push(w),
                None => p.add(
                    format!("{cpath}.basis"),
                    "a dry basis needs H2O in the species library",
                ),
            }
        }
        let before = p.len();
        for (r, _) in &reactions {
            for (s, n) in r.species.iter().zip(&r.names) {
                if !gas.contains(s) {
                    let hint = if comp.basis == Basis::Wet && n == "H2O" {
                        " (a wet analysis reports its own water)"
                    } else {
                        ""
                    };
                    p.add(
                        format!("{cpath}.components"),
                        format!(
                            "{n}, a species of `{}`, is not analysed; add it{hint}",
                            r.text
                        ),
                    );
                }
            }
        }
        if p.len() == before {
            match ReactorModel::new(db, reactions.clone(), &gas, eos, None) {
                Ok(mut m) => {
                    m.band_ln = band_ln;
                    model = Some(m);
                }
                Err(e) => p.add(model_error_path(&path, &e), e.to_string()),
            }
            match EquilibriumSystem::from_reactions(db, &reactions, &gas, eos, None) {
                Ok(s) => equilibrium = Some(s),
                Err(e) => p.add(equilibrium_error_path(&path, &e), e.to_string()),
            }
        }
    }

    let mut watch = watch::watch(
        p,
        &path,
        raw.drift.as_ref(),
        raw.alerts.as_ref(),
        &raw.alarm,
        raw.offline_below.as_deref(),
        atmosphere_bar,
    );
    let bed_rise = raw
        .bed_rise
        .as_ref()
        .and_then(|b| bed_rise(p, &format!("{path}.bed_rise"), b, &temperatures, &mut watch));
    if p.len() > start {
        return None;
    }
    let (
        Some((composition, composition_source, _)),
        Some(model),
        Some(equilibrium),
        Some(key_component),
    ) = (composition, model, equilibrium, key_component)
    else {
        return None;
    };
    let reaction_labels = model
        .reactions()
        .iter()
        .map(|t| t.reaction.canonical())
        .collect();
    let (temperatures, temperature_sources): (Vec<_>, Vec<_>) =
        temperatures.into_iter().map(ScalarSettings::split).unzip();
    let (pressure, pressure_source) = pressure.split();
    let (steam_ratio, steam_ratio_source) = match steam_ratio.map(SteamRatioSettings::split) {
        Some((spec, source)) => (Some(spec), source),
        None => (None, None),
    };
    Some(ReactorSettings {
        spec: ReactorSpec {
            id: id.to_string(),
            name,
            reactions,
            eos,
            model,
            equilibrium,
            key_component,
            composition,
            temperatures,
            pressure,
            steam_ratio,
            uncertainty,
            transient_k_per_min,
            watch,
            reaction_labels,
            bed_rise,
            clock: crate::monitor::spec::ClockWindow::default(),
        },
        wiring: Wiring {
            composition: composition_source,
            temperatures: temperature_sources,
            pressure: pressure_source,
            steam_ratio: steam_ratio_source,
        },
    })
}

fn bed_rise(
    p: &mut Problems,
    path: &str,
    raw: &RawBedRise,
    temperatures: &[ScalarSettings],
    watch: &mut WatchSettings,
) -> Option<BedRiseSpec> {
    let tag = raw.inlet_temperature.trim();
    let Some(inlet) = temperatures.iter().position(|t| t.tag == tag) else {
        let known: Vec<&str> = temperatures.iter().map(|t| t.tag.as_str()).collect();
        p.add(
            format!("{path}.inlet_temperature"),
            format!(
                "\"{tag}\" is not the tag of one of this reactor's [[temperature]] entries ({})",
                known.join(", ")
            ),
        );
        return None;
    };
    if temperatures.len() < 2 {
        p.add(
            format!("{path}.inlet_temperature"),
            "the reactor needs an outlet thermocouple besides the inlet one",
        );
        return None;
    }
    let mut co_co2 = (None, None);
    for (sp, text) in raw.inlet.iter().flatten() {
        let key = key_path(&format!("{path}.inlet"), sp);
        let slot = match sp.trim() {
            "CO" => &mut co_co2.0,
            "CO2" => &mut co_co2.1,
            other => {
                p.add(key, format!("\"{other}\" is not CO or CO2"));
                continue;
            }
        };
        match composition_amount("inlet amount", text) {
            Ok(f) if (0.0..0.2).contains(&f) => *slot = Some(f),
            Ok(_) => p.add(key, format!("\"{text}\" must be from 0 to 20 mol%")),
            Err(m) => p.add(key, m),
        }
    }
    let inlet_co_co2 = match co_co2 {
        (None, None) => None,
        (co, co2) => Some((co.unwrap_or(0.0), co2.unwrap_or(0.0))),
    };
    if let Some(t) = &raw.alert_above_expected {
        let key = format!("{path}.alert_above_expected");
        if inlet_co_co2.is_none() {
            p.add(
                key,
                "needs the inlet CO and CO2 (bed_rise.inlet) to know what to expect",
            );
        } else {
            match watch::kelvin(p, &key, t) {
                Some(v) if v > 0.0 => watch.alerts.bed_rise_excess_k = Some(v),
                Some(v) => p.add(key, format!("{v} K must be above zero")),
                None => {}
            }
        }
    }
    Some(BedRiseSpec {
        inlet,
        inlet_co_co2,
    })
}

fn steam_ratio(p: &mut Problems, path: &str, raw: &RawSteamRatio) -> Option<SteamRatioSettings> {
    match (raw.value, &raw.topic) {
        (Some(_), Some(_)) => {
            p.add(
                path,
                "give value (a fixed ratio) or topic (a measured one), not both",
            );
            None
        }
        (Some(v), None) => {
            for (key, given) in [
                ("tag", raw.tag.is_some()),
                ("decoder", raw.decoder.is_some()),
                ("value_pointer", raw.value_pointer.is_some()),
                ("ts_pointer", raw.ts_pointer.is_some()),
                ("quality_pointer", raw.quality_pointer.is_some()),
                ("unit_pointer", raw.unit_pointer.is_some()),
                ("max_age", raw.max_age.is_some()),
            ] {
                if given {
                    p.add(
                        format!("{path}.{key}"),
                        "only for a measured steam ratio (with topic); a fixed value needs none",
                    );
                }
            }
            if v.is_finite() && v > 0.0 {
                Some(SteamRatioSettings::Fixed(v))
            } else {
                p.add(
                    format!("{path}.value"),
                    format!("{v} must be above zero (mol H2O per mol dry gas)"),
                );
                None
            }
        }
        (None, Some(_)) => Some(SteamRatioSettings::Measured(scalar(
            p,
            path,
            raw.into(),
            ScalarKind::Ratio,
        ))),
        (None, None) => {
            p.add(
                path,
                "give value = 0.5 (a fixed ratio) or topic = \"...\" (a measured one)",
            );
            None
        }
    }
}

// ---------------------------------------------------------------------------
// Plant summary

/// The temperature the summary quotes every K at, so reactors compare at a glance.
const SUMMARY_T_K: f64 = 700.0;

fn temperature_unit_label(u: TemperatureUnit) -> &'static str {
    match u {
        TemperatureUnit::Kelvin => "K",
        TemperatureUnit::Celsius => "degC",
        TemperatureUnit::Fahrenheit => "degF",
        TemperatureUnit::Rankine => "degR",
    }
}

fn pressure_unit_label(u: PressureUnit) -> String {
    const NAMES: [&str; 15] = [
        "bara", "barg", "mbar", "mbarg", "Pa", "Pag", "kPa", "kPag", "MPa", "MPag", "psia", "psig",
        "atm", "kg/cm2a", "kg/cm2g",
    ];
    NAMES
        .iter()
        .find(|n| PressureUnit::parse(n).is_ok_and(|x| x == u))
        .map_or_else(
            || {
                format!(
                    "{} bar per unit{}",
                    u.bar_per_unit,
                    if u.gauge { ", gauge" } else { "" }
                )
            },
            |n| (*n).to_string(),
        )
}

fn show_bytes(n: u64) -> String {
    const MIB: u64 = 1024 * 1024;
    if n >= MIB && n % MIB == 0 {
        format!("{} MiB", n / MIB)
    } else if n >= 1024 && n % 1024 == 0 {
        format!("{} KiB", n / 1024)
    } else {
        format!("{n} bytes")
    }
}

fn show_decoder(d: &ScalarDecoder) -> String {
    match d {
        ScalarDecoder::Number => "bare number".to_string(),
        ScalarDecoder::Json { value_pointer, .. } => format!("json {value_pointer}"),
    }
}

fn show_scalar(s: &InputSpec, source: &ScalarSource) -> String {
    let unit = match s.unit {
        ScalarUnit::Temperature(t) => temperature_unit_label(t).to_string(),
        ScalarUnit::Pressure(p) => pressure_unit_label(p),
        ScalarUnit::Ratio => "mol H2O/mol dry gas".to_string(),
    };
    format!(
        "{} on {} ({unit}, {}), stale after {}",
        s.tag,
        source.topic,
        show_decoder(&source.decoder),
        show_duration(s.max_age)
    )
}

/// A number without trailing zeros (up to six decimals): `2`, `0.004`, `1.01325`.
fn show_number(x: f64) -> String {
    let text = format!("{x:.6}");
    let text = text.trim_end_matches('0').trim_end_matches('.');
    if text == "-0" {
        "0".to_string()
    } else {
        text.to_string()
    }
}

/// K to four significant figures, in plain notation where that reads well.
fn show_k(k: f64) -> String {
    if (1e-3..1e4).contains(&k) {
        let decimals = (3.0 - k.log10().floor()).max(0.0) as usize;
        format!("{k:.decimals$}")
    } else {
        format!("{k:.3e}")
    }
}

/// The plant as `eqwatch check` prints it for a valid configuration: site, broker,
/// output prefix, journal, http, then per reactor its reactions with ln K and K at
/// 700 K (one temperature for all, so reactors compare at a glance), equation of
/// state, basis, inputs and key component.
pub fn summary(settings: &Settings) -> String {
    let s = settings;
    let b = &s.broker;
    let mut out: Vec<String> = Vec::new();
    let mut row = |label: &str, text: String| out.push(format!("{label:<14}{text}"));
    row("site", s.site.clone());
    let protocol = match b.protocol {
        MqttProtocol::V311 => "MQTT 3.1.1",
        MqttProtocol::V5 => "MQTT 5",
    };
    let scheme = if b.tls { "mqtts" } else { "mqtt" };
    let host = if b.host.contains(':') {
        format!("[{}]", b.host)
    } else {
        b.host.clone()
    };
    row(
        "broker",
        format!(
            "{scheme}://{host}:{}, {protocol}, client id {}",
            b.port, b.client_id
        ),
    );
    let session = if b.session_expiry.is_zero() {
        "clean session".to_string()
    } else {
        format!("session kept {}", show_duration(b.session_expiry))
    };
    let login = match (&b.username, &b.password) {
        (Some(u), Some(_)) => format!("user {u} with a password"),
        (Some(u), None) => format!("user {u}, no password"),
        (None, Some(_)) => "a password, no user name".to_string(),
        (None, None) => "anonymous".to_string(),
    };
    row(
        "",
        format!(
            "keep-alive {}, {session}, {login}",
            show_duration(b.keep_alive)
        ),
    );
    row(
        "",
        format!(
            "packets up to {}, {} in flight, reconnect after {} to {}",
            show_bytes(b.max_packet_bytes as u64),
            b.inflight,
            show_duration(b.reconnect_min),
            show_duration(b.reconnect_max)
        ),
    );
    if b.tls {
        let file = |f: &Option<PathBuf>| {
            f.as_ref()
                .map_or("none".to_string(), |p| p.display().to_string())
        };
        row(
            "",
            format!(
                "tls: ca {}, client certificate {}",
                file(&b.ca_file),
                file(&b.client_cert_file)
            ),
        );
    }
    row("results", format!("{}/<reactor>/...", s.topic_prefix));
    let j = &s.journal;
    row(
        "journal",
        format!(
            "{} (files up to {}, {} in all, fsync every {})",
            j.dir.display(),
            show_bytes(j.max_file_bytes),
            show_bytes(j.max_total_bytes),
            show_duration(j.fsync_interval)
        ),
    );
    row(
        "http",
        s.http_listen.map_or("off".to_string(), |a| a.to_string()),
    );
    row(
        "atmosphere",
        format!(
            "{} bar absolute (added to gauge readings)",
            show_number(s.atmosphere_bar)
        ),
    );
    row("species", format!("{} in the library", s.species.len()));
    for settings in &s.reactors {
        let (r, w) = (&settings.spec, &settings.wiring);
        row("", String::new());
        row("reactor", format!("{}: {}", r.id, r.name));
        for (reaction, k) in &r.reactions {
            let (lo, hi) = k.valid_range_k();
            let ln_k = k.ln_k(SUMMARY_T_K);
            let outside = if k.in_range(SUMMARY_T_K) {
                ""
            } else {
                " (outside the source's range)"
            };
            row("  reaction", reaction.canonical());
            row(
                "",
                format!(
                    "K from {} (valid {lo:.0} to {hi:.0} K); at {SUMMARY_T_K:.0} K ln K = {ln_k:.3}, K = {}{outside}",
                    k.id().as_str(),
                    show_k(ln_k.exp())
                ),
            );
        }
        row(
            "  eos",
            format!(
                "{}; at equilibrium within |ln(Q/K)| <= {}",
                r.eos.as_str(),
                show_number(r.model.band_ln)
            ),
        );
        let c = &r.composition;
        match &w.composition {
            CompositionSource::Analyser { topic, .. } => row(
                "  analysis",
                format!("{} on {topic}: {}", c.tag, c.components.join(", ")),
            ),
            CompositionSource::PerComponent { topics, decoder } => {
                row(
                    "  analysis",
                    format!(
                        "{}, one topic per component ({}):",
                        c.tag,
                        show_decoder(decoder)
                    ),
                );
                for (name, topic) in topics {
                    row("", format!("  {name} on {topic}"));
                }
            }
        }
        row(
            "",
            format!(
                "{} basis, {}, sums to 100 ± {} mol%, lag {}, stale after {}",
                c.basis.as_str(),
                c.unit.label(),
                show_number(c.sum_tolerance * 100.0),
                show_duration(c.lag),
                show_duration(c.max_age)
            ),
        );
        let water = if c.basis == Basis::Dry {
            " (H2O from the steam ratio)"
        } else {
            ""
        };
        row("  gas", format!("{}{water}", r.model.names().join(", ")));
        for (t, source) in r.temperatures.iter().zip(&w.temperatures) {
            row("  temperature", show_scalar(t, source));
        }
        row("  pressure", show_scalar(&r.pressure, &w.pressure));
        match (&r.steam_ratio, &w.steam_ratio) {
            (Some(SteamRatioSpec::Fixed(v)), _) => row(
                "  steam ratio",
                format!("fixed at {} mol H2O per mol dry gas", show_number(*v)),
            ),
            (Some(SteamRatioSpec::Measured(m)), Some(source)) => {
                row("  steam ratio", show_scalar(m, source));
            }
            _ => {}
        }
        row("  key", s.species.get(r.key_component).name.clone());
        let u = &r.uncertainty;
        let steam = if r.steam_ratio.is_some() {
            format!(", steam ratio {} %", show_number(u.steam_ratio_rel * 100.0))
        } else {
            String::new()
        };
        row(
            "  ±",
            format!(
                "{} K, {} bar, {} % of reading{steam}",
                show_number(u.temperature_k),
                show_number(u.pressure_bar),
                show_number(u.composition_rel * 100.0)
            ),
        );
        row(
            "  transient",
            format!("above {} K/min", show_number(r.transient_k_per_min)),
        );
        for (label, line) in watch::summary_lines(&r.watch) {
            row(label, line);
        }
    }
    if !s.commands.allowed_users.is_empty() || !s.commands.allowed_clients.is_empty() {
        row(
            "commands",
            format!(
                "from users [{}], client ids [{}]",
                s.commands.allowed_users.join(", "),
                s.commands.allowed_clients.join(", ")
            ),
        );
    }
    let mut text = out.join("\n");
    text.push('\n');
    text
}

/// Replaces the configured broker address with `url` (`mqtt://host[:port]` or
/// `mqtts://...`), as `eqwatch run --broker` does; validated like the file's `broker.url`.
pub fn override_broker(settings: &mut Settings, url: &str) -> Result<(), ConfigErrors> {
    let mut p = Problems(Vec::new());
    let (tls, host, port) = broker_url(&mut p, url);
    if !p.is_empty() {
        return Err(p.into_errors());
    }
    settings.broker.tls = tls;
    settings.broker.host = host;
    settings.broker.port = port;
    Ok(())
}

#[cfg(test)]
mod tests {
    //! Check values: the demo plant's reactors, tags and topics are those of the
    //! lead's brief for `config/demo-plant.toml` (invented plant data); every other
    //! figure is an invented config for the test. Expected messages are this module's
    //! own wording (and the unit lists of `units.rs`).

    use super::*;
    use std::env::VarError;

    fn config_dir() -> PathBuf {
        Path::new(env!("CARGO_MANIFEST_DIR")).join("config")
    }

    fn no_env(_: &str) -> Result<String, VarError> {
        Err(VarError::NotPresent)
    }

    /// Validates text with an empty environment, paths relative to `base`.
    fn check_in(text: &str, base: &Path) -> Result<Settings, ConfigErrors> {
        from_str_with_env(text, base, &no_env)
    }

    fn check(text: &str) -> Result<Settings, ConfigErrors> {
        check_in(text, Path::new("."))
    }

    fn refused(text: &str) -> ConfigErrors {
        match check(text) {
            Ok(_) => panic!("accepted:\n{text}"),
            Err(e) => e,
        }
    }

    /// Asserts that `e` holds exactly the expected problems: (key path, part of message).
    fn assert_problems(what: &str, e: &ConfigErrors, expected: &[(&str, &str)]) {
        for (path, text) in expected {
            assert!(
                e.problems
                    .iter()
                    .any(|p| p.path == *path && p.message.contains(text)),
                "{what}: no problem at {path} containing {text:?}; got:\n{e}"
            );
        }
        assert_eq!(
            e.problems.len(),
            expected.len(),
            "{what}: other problems than expected:\n{e}"
        );
    }

    fn broken(name: &str) -> ConfigErrors {
        match load(&config_dir().join("broken").join(name)) {
            Ok(_) => panic!("config/broken/{name} was accepted"),
            Err(e) => e,
        }
    }

    // Invented config for the test: one valid high-temperature shift reactor.
    const REACTOR: &str = r#"
[journal]
dir = "var/journal"

[reactors.hts1]
reactions = [{ equation = "CO + H2O = CO2 + H2", k_source = "xu-froment-1989" }]

[reactors.hts1.composition]
topic = "baw1/hts1/AI-201"
basis = "dry"
components = ["H2", "N2", "CO", "CO2", "CH4", "Ar"]
max_age = "15 min"

[[reactors.hts1.temperature]]
topic = "baw1/hts1/TI-205"
unit = "degC"
max_age = "2 min"

[reactors.hts1.pressure]
topic = "baw1/hts1/PI-202"
unit = "barg"
max_age = "2 min"

[reactors.hts1.steam_ratio]
value = 0.48
"#;

    fn with_broker(broker: &str) -> String {
        format!("site = \"baw1\"\n\n[broker]\n{broker}\n{REACTOR}")
    }

    #[test]
    fn demo_plant_parses() {
        let s = match load(&config_dir().join("demo-plant.toml")) {
            Ok(s) => s,
            Err(e) => panic!("demo plant refused:\n{e}"),
        };
        assert_eq!(s.site, "baw1");
        assert_eq!(s.topic_prefix, "eqwatch/baw1");
        assert_eq!(s.atmosphere_bar, STANDARD_ATMOSPHERE_BAR);
        assert_eq!(s.broker.host, "127.0.0.1");
        assert_eq!(s.broker.port, 1883);
        assert!(!s.broker.tls);
        assert_eq!(s.broker.protocol, MqttProtocol::V311);
        assert_eq!(s.broker.keep_alive, Duration::from_secs(15));
        assert_eq!(s.broker.session_expiry, Duration::from_secs(3600));
        assert_eq!(s.broker.reconnect_min, Duration::from_millis(250));
        assert_eq!(s.broker.password, None);
        assert!(s.journal.dir.ends_with("var/journal"));
        assert!(s.journal.dir.starts_with(config_dir()));
        assert_eq!(
            s.http_listen,
            Some(SocketAddr::from(([127, 0, 0, 1], 9873)))
        );

        let ids: Vec<&str> = s.reactors.iter().map(|r| r.spec.id.as_str()).collect();
        assert_eq!(ids, ["ref1", "hts1", "lts1", "mth1", "amc1"], "file order");
        let r = |id: &str| s.reactors.iter().find(|r| r.spec.id == id).unwrap();
        let key = |id: &str| s.species.get(r(id).spec.key_component).name.clone();

        let ref1 = r("ref1");
        assert_eq!(ref1.spec.reactions.len(), 2);
        assert!(
            ref1.spec
                .reactions
                .iter()
                .all(|(_, k)| k.id() == KSourceId::XuFroment1989)
        );
        assert_eq!(ref1.spec.composition.basis, Basis::Dry);
        assert_eq!(ref1.spec.model.names(), ["CH4", "CO", "CO2", "H2", "H2O"]);
        assert_eq!(ref1.spec.composition.lag, Duration::from_secs(60));
        let tis: Vec<&str> = ref1
            .wiring
            .temperatures
            .iter()
            .map(|t| t.topic.as_str())
            .collect();
        assert_eq!(tis, ["baw1/ref1/TI-105A", "baw1/ref1/TI-105B"]);
        assert_eq!(
            ref1.spec.temperatures[0].unit,
            ScalarUnit::Temperature(TemperatureUnit::Celsius)
        );
        assert_eq!(ref1.wiring.pressure.topic, "baw1/ref1/PI-102");
        assert_eq!(
            ref1.spec.pressure.unit,
            ScalarUnit::Pressure(PressureUnit::parse("barg").unwrap())
        );
        match (&ref1.spec.steam_ratio, &ref1.wiring.steam_ratio) {
            (Some(SteamRatioSpec::Measured(m)), Some(source)) => {
                assert_eq!(source.topic, "baw1/ref1/FY-110");
                assert_eq!(m.tag, "BAW1-FY-110");
                assert_eq!(source.decoder, ScalarDecoder::Number);
                assert_eq!(m.unit, ScalarUnit::Ratio);
            }
            other => panic!("ref1 steam ratio: {other:?}"),
        }
        assert_eq!(key("ref1"), "CH4", "default: first reactant of reforming");
        assert_eq!(ref1.spec.eos, EosKind::Ideal);
        assert_eq!(ref1.spec.uncertainty.temperature_k, 2.0);
        assert_eq!(ref1.spec.uncertainty.pressure_bar, 0.2);
        assert_eq!(ref1.spec.uncertainty.composition_rel, 0.02);
        assert_eq!(ref1.spec.uncertainty.steam_ratio_rel, 0.05);

        let hts1 = r("hts1");
        assert_eq!(
            hts1.spec.model.names(),
            ["H2", "N2", "CO", "CO2", "CH4", "Ar", "H2O"]
        );
        assert!(matches!(hts1.spec.steam_ratio, Some(SteamRatioSpec::Fixed(v)) if v == 0.48));
        assert_eq!(key("hts1"), "CO");

        let lts1 = r("lts1");
        assert_eq!(lts1.spec.reactions[0].1.id(), KSourceId::Moe1962);
        assert_eq!(lts1.spec.temperatures.len(), 2);
        assert_eq!(lts1.spec.model.band_ln, 0.01);
        assert_eq!(lts1.spec.transient_k_per_min, 2.0);
        match &lts1.wiring.composition {
            CompositionSource::Analyser {
                topic,
                values_pointer,
                ts_pointer,
                ..
            } => {
                assert_eq!(topic, "baw1/lts1/AI-301");
                assert_eq!(values_pointer, "/values");
                assert_eq!(ts_pointer.as_deref(), Some("/ts"));
            }
            other => panic!("lts1 source: {other:?}"),
        }
        match &lts1.wiring.steam_ratio {
            Some(m) => {
                assert_eq!(m.topic, "baw1/lts1/FY-310");
                assert!(
                    matches!(&m.decoder, ScalarDecoder::Json { value_pointer, .. } if value_pointer == "/value")
                );
            }
            other => panic!("lts1 steam ratio: {other:?}"),
        }

        let mth1 = r("mth1");
        assert_eq!(mth1.spec.reactions.len(), 2);
        assert!(
            mth1.spec
                .reactions
                .iter()
                .all(|(_, k)| k.id() == KSourceId::SpeciesData)
        );
        assert_eq!(mth1.spec.composition.unit, CompositionUnit::Percent);
        match &mth1.wiring.composition {
            CompositionSource::PerComponent { topics, decoder } => {
                let expected: Vec<(String, String)> = ["H2", "N2", "CH4", "Ar", "CO", "CO2"]
                    .iter()
                    .map(|n| (n.to_string(), format!("baw1/mth1/AI-401/{n}")))
                    .collect();
                assert_eq!(topics, &expected, "in the order of components");
                assert!(matches!(decoder, ScalarDecoder::Json { .. }));
            }
            other => panic!("mth1 source: {other:?}"),
        }
        assert!(matches!(mth1.spec.steam_ratio, Some(SteamRatioSpec::Fixed(v)) if v == 0.004));
        assert_eq!(key("mth1"), "CO");

        let amc1 = r("amc1");
        assert_eq!(amc1.spec.eos, EosKind::PengRobinson);
        assert_eq!(amc1.spec.composition.basis, Basis::Wet);
        assert_eq!(amc1.spec.model.names(), ["H2", "N2", "NH3", "Ar", "CH4"]);
        assert!(amc1.spec.steam_ratio.is_none());
        assert_eq!(key("amc1"), "NH3");

        let text = summary(&s);
        for needle in [
            "site          baw1",
            "mqtt://127.0.0.1:1883, MQTT 3.1.1, client id eqwatch-baw1",
            "results       eqwatch/baw1/<reactor>/...",
            "http          127.0.0.1:9873",
            "reactor       amc1: Ammonia converter bed 1 outlet",
            "  reaction    N2 + 3 H2 = 2 NH3",
            "K from moe-1962 (valid 400 to 1000 K); at 700 K ln K = ",
            "  eos         peng-robinson",
            "  analysis    BAW1-AI-401, one topic per component",
            "                CO2 on baw1/mth1/AI-401/CO2",
            "  steam ratio fixed at 0.48 mol H2O per mol dry gas",
            "  steam ratio BAW1-FY-110 on baw1/ref1/FY-110 (mol H2O/mol dry gas, bare number)",
            "  pressure    BAW1-PI-502 on baw1/amc1/PI-502 (barg, json /value), stale after 2 min",
            "  key         NH3",
            "dry basis, mol%, sums to 100 ± 2 mol%, lag 1 min, stale after 15 min",
        ] {
            assert!(text.contains(needle), "summary lacks {needle:?}:\n{text}");
        }
    }

    #[test]
    fn broken_unknown_units() {
        assert_problems(
            "unknown-unit.toml",
            &broken("unknown-unit.toml"),
            &[
                (
                    "reactors.lts1.composition.unit",
                    "unknown unit \"mol-%\"; expected one of fraction, mol%",
                ),
                (
                    "reactors.lts1.temperature[0].unit",
                    "unknown unit \"degK\"; expected one of K, degC",
                ),
                (
                    "reactors.lts1.pressure.unit",
                    "unit \"psi\" is ambiguous; write psia for absolute or psig for gauge",
                ),
                (
                    "reactors.lts1.uncertainty.pressure",
                    "unit \"furlongs\" is not understood",
                ),
            ],
        );
    }

    #[test]
    fn drift_alert_and_alarm_sections_say_what_to_fix() {
        let e = broken("bad-alarms.toml");
        let msgs: Vec<String> = e
            .problems
            .iter()
            .map(|p| format!("{}: {}", p.path, p.message))
            .collect();
        let has = |path: &str, text: &str| {
            assert!(
                e.problems
                    .iter()
                    .any(|p| p.path == path && p.message.contains(text)),
                "no problem at {path} containing {text:?}; got:\n{}",
                msgs.join("\n")
            )
        };
        has("reactors.lts1.offline_below", "\"5 psi\"");
        has("reactors.lts1.drift.trend", "unknown method \"spline\"");
        has(
            "reactors.lts1.drift.end_of_run_limit",
            "not a temperature difference",
        );
        has("reactors.lts1.alerts.trend_above", "not a positive rate");
        has(
            "reactors.lts1.alarm[0]",
            "exactly one of `above` and `below`",
        );
        has("reactors.lts1.alarm[0].rationale", "give the rationale");
        has("reactors.lts1.alarm[1].above", "\"5 K\"");
        has("reactors.lts1.alarm[1].on_delay", "\"3 samples\"");
        assert_eq!(e.problems.len(), 8, "{}", msgs.join("\n"));
    }

    #[test]
    fn the_demo_plant_watch_settings() {
        // config/demo-plant.toml (invented): ref1 has one rationalised alarm, 20 K high
        // with a 2 K deadband and a 2-sample on-delay; lts1 forecasts end of run at 20 K.
        let s = load(&config_dir().join("demo-plant.toml")).unwrap();
        let ref1 = &s.reactors[0].spec.watch;
        assert_eq!(ref1.alarms.len(), 1);
        let a = &ref1.alarms[0].config;
        assert_eq!(
            (a.id.as_str(), a.limit, a.deadband, a.on_delay_samples),
            ("approach-high", 20.0, 2.0, 2)
        );
        assert_eq!(a.realarm_ms, Some(8 * 3_600_000));
        let lts = &s.reactors[2].spec.watch;
        assert_eq!(lts.drift.end_of_run_limit_k, Some(20.0));
        assert_eq!(lts.alerts.end_of_run_within_days, Some(90.0));
        // 20 barg on a 1.01325 bar atmosphere.
        assert!((ref1.offline_below_bar.unwrap() - 21.01325).abs() < 1e-12);
        // The methanator alarm is in ppm: 5 ppm = 5e-6 mole fraction.
        let m = &s.reactors[3].spec.watch.alarms[0];
        assert_eq!((m.config.limit, m.unit), (5.0, "ppm"));
        assert!((m.scale - 1e6).abs() < 1e-6);
        assert_eq!(s.commands.allowed_users, ["op-demo", "eng-demo"]);
    }

    #[test]
    fn broken_unknown_species() {
        assert_problems(
            "unknown-species.toml",
            &broken("unknown-species.toml"),
            &[
                (
                    "reactors.lts1.reactions[0].equation",
                    "unknown species `H20`; did you mean H2, H2O",
                ),
                (
                    "reactors.lts1.composition.components[3]",
                    "unknown species \"C02\"; did you mean CO2",
                ),
                ("reactors.lts1.key_component", "unknown species \"NH4\""),
                (
                    "reactors.mth1.composition.topics.NH3",
                    "NH3 is not in reactors.mth1.composition.components",
                ),
                ("reactors.mth1.composition.topics", "no topic for CO2"),
            ],
        );
    }

    #[test]
    fn broken_reactions() {
        assert_problems(
            "unbalanced-reaction.toml",
            &broken("unbalanced-reaction.toml"),
            &[
                (
                    "reactors.ref1.reactions[0].equation",
                    "is not balanced: H: products have 2 atoms fewer than reactants",
                ),
                (
                    "reactors.hts1.reactions[0].k_source",
                    "K source gillespie-beattie-1930 does not describe `CO + H2O = CO2 + H2`",
                ),
                (
                    "reactors.hts1.reactions[1].k_source",
                    "unknown K source `moe-1963`",
                ),
                (
                    "reactors.mth1.composition.components",
                    "CH4, a species of `CO + 3 H2 = CH4 + H2O`, is not analysed",
                ),
                (
                    "reactors.lts1.reactions",
                    "the reactions are not independent",
                ),
            ],
        );
    }

    #[test]
    fn broken_water_basis() {
        assert_problems(
            "dry-without-steam-ratio.toml",
            &broken("dry-without-steam-ratio.toml"),
            &[
                (
                    "reactors.hts1.steam_ratio",
                    "missing; a dry-basis analysis needs the steam-to-dry-gas ratio",
                ),
                (
                    "reactors.lts1.composition.components[6]",
                    "H2O on a dry-basis analysis",
                ),
                ("reactors.lts1.steam_ratio.value", "must be above zero"),
                (
                    "reactors.amc1.steam_ratio",
                    "only for basis = \"dry\"; a wet analysis already contains its water",
                ),
            ],
        );
    }

    #[test]
    fn broken_broker() {
        assert_problems(
            "bad-broker.toml",
            &broken("bad-broker.toml"),
            &[
                (
                    "broker.url",
                    "port \"99999\" is not a number from 1 to 65535",
                ),
                (
                    "broker.client_id",
                    "is 26 bytes; MQTT 3.1.1 brokers need accept only 1 to 23",
                ),
                ("broker.keep_alive", "2 s is too short; at least 5 s"),
                ("broker.session_expiry", "\"soon\" is not a number"),
                (
                    "broker.password_env",
                    "give password_file or password_env, not both",
                ),
                ("broker.ca_file", "only for an mqtts:// broker url"),
                ("broker.max_packet_bytes", "512 is outside 1024 (1 KiB)"),
                (
                    "broker.reconnect_min",
                    "1 min is above reconnect_max (30 s)",
                ),
                ("broker.inflight", "0 is outside 1 to 65535"),
                ("journal.fsync_interval", "must be above zero"),
                (
                    "http.listen",
                    "\"localhost:9873\" is not an address and port",
                ),
            ],
        );
    }

    #[test]
    fn broken_several_problems_at_once() {
        assert_problems(
            "several-problems.toml",
            &broken("several-problems.toml"),
            &[
                (
                    "site",
                    "\"baw 1\" may use only letters, digits, `-` and `_`",
                ),
                ("atmosphere", "\"1 barg\" is a gauge pressure"),
                (
                    "species_files[0]",
                    "no-such-species-file.toml: no such file",
                ),
                (
                    "reactors.\"lts 1\"",
                    "reactor id \"lts 1\" may use only letters, digits",
                ),
                (
                    "reactors.\"lts 1\".eos",
                    "unknown equation of state \"virial\"",
                ),
                (
                    "reactors.\"lts 1\".band",
                    "-1 must be a number zero or more",
                ),
                (
                    "reactors.\"lts 1\".transient",
                    "expected a rate such as \"2 K/min\"",
                ),
                (
                    "reactors.\"lts 1\".composition.sum_tolerance",
                    "\"150 mol%\" is outside 0 to 100 mol%",
                ),
                (
                    "reactors.\"lts 1\".composition.lag",
                    "\"fast\" is not a number followed by a unit",
                ),
                (
                    "reactors.\"lts 1\".composition.max_age",
                    "must be above zero",
                ),
                (
                    "reactors.\"lts 1\".temperature[0].decoder",
                    "unknown decoder \"xml\"",
                ),
                (
                    "reactors.\"lts 1\".temperature[0].topic",
                    "\"baw1/lts1/+\" contains a wildcard",
                ),
                (
                    "reactors.\"lts 1\".pressure.topic",
                    "is also reactors.\"lts 1\".composition.topic",
                ),
                (
                    "reactors.mth1.composition",
                    "give topic (one analyser message with every component) or topics",
                ),
                ("reactors.mth1.temperature", "no thermocouple"),
                (
                    "reactors.mth1.steam_ratio.value_pointer",
                    "only with decoder = \"json\"",
                ),
                (
                    "reactors.mth1.steam_ratio.topic",
                    "lies under eqwatch's own output prefix \"eqwatch/baw1\"",
                ),
            ],
        );
    }

    #[test]
    fn broken_no_reactors() {
        assert_problems(
            "no-reactors.toml",
            &broken("no-reactors.toml"),
            &[("reactors", "no reactors")],
        );
    }

    #[test]
    fn broken_syntax_gives_line_and_column() {
        assert_problems(
            "syntax.toml",
            &broken("syntax.toml"),
            &[("(file)", "TOML syntax: line 5, column 7: ")],
        );
    }

    #[test]
    fn unknown_and_missing_keys_name_their_path() {
        assert_problems(
            "unknown-key.toml",
            &broken("unknown-key.toml"),
            &[(
                "reactors.lts1.temperature[1].max_aeg",
                "unknown field `max_aeg`, expected one of",
            )],
        );
        // Invented config for the test: [broker] without url.
        let e = refused(&with_broker("client_id = \"eqwatch-baw1\""));
        assert_problems(
            "no url",
            &e,
            &[("broker.url", "missing; this key is required")],
        );
        // Invented config for the test: a misspelt key in an inline table.
        let text = REACTOR.replace(
            "[reactors.hts1.composition]",
            "uncertainty = { temprature = \"2 K\" }\n\n[reactors.hts1.composition]",
        );
        let e = refused(&format!(
            "site = \"baw1\"\n[broker]\nurl = \"mqtt://127.0.0.1\"\n{text}"
        ));
        assert_problems(
            "inline",
            &e,
            &[(
                "reactors.hts1.uncertainty.temprature",
                "unknown field `temprature`",
            )],
        );
        // Invented config for the test: a number where text belongs.
        let e = refused(&with_broker(
            "url = \"mqtt://127.0.0.1\"\ninflight = \"many\"",
        ));
        assert_problems(
            "type",
            &e,
            &[("broker.inflight", "expected a whole number (line 5)")],
        );
    }

    #[test]
    fn display_lists_every_problem_on_its_own_line() {
        let e = broken("dry-without-steam-ratio.toml");
        let text = e.to_string();
        assert_eq!(text.lines().count(), e.problems.len());
        assert!(
            text.lines()
                .any(|l| l.starts_with("reactors.hts1.steam_ratio: missing"))
        );
    }

    #[test]
    fn durations() {
        // Invented durations for the test; definitions 1 min = 60 s, 1 h = 3600 s, 1 d = 86400 s.
        let ok = [
            ("250 ms", Duration::from_millis(250)),
            ("15 s", Duration::from_secs(15)),
            ("90s", Duration::from_secs(90)),
            ("5 min", Duration::from_secs(300)),
            ("2 h", Duration::from_secs(7200)),
            ("1 d", Duration::from_secs(86_400)),
            ("1.5 s", Duration::from_millis(1500)),
            ("0.1 s", Duration::from_millis(100)),
            ("0 s", Duration::ZERO),
            ("  2 H ", Duration::from_secs(7200)),
            ("1e3 ms", Duration::from_secs(1)),
        ];
        for (text, expected) in ok {
            assert_eq!(parse_duration(text), Ok(expected), "{text}");
        }
        let kind = |e: &DurationError| match e {
            DurationError::NotANumber(_) => "not a number",
            DurationError::NoUnit(_) => "no unit",
            DurationError::UnknownUnit { .. } => "unknown unit",
            DurationError::Negative(_) => "negative",
            DurationError::TooLong(_) => "too long",
        };
        for (text, expected) in [
            ("15", "no unit"),
            ("fast", "not a number"),
            ("", "not a number"),
            ("NaN s", "not a number"),
            ("15 parsecs", "unknown unit"),
            ("-1 s", "negative"),
            ("1e300 d", "too long"),
        ] {
            match parse_duration(text) {
                Err(e) => assert_eq!(kind(&e), expected, "{text}: {e}"),
                Ok(d) => panic!("{text} accepted as {d:?}"),
            }
        }
        for (d, shown) in [
            (Duration::from_millis(250), "250 ms"),
            (Duration::from_secs(90), "90 s"),
            (Duration::from_secs(3600), "1 h"),
            (Duration::from_millis(1500), "1.5 s"),
            (Duration::ZERO, "0 s"),
        ] {
            assert_eq!(show_duration(d), shown);
        }
    }

    #[test]
    fn password_from_file_or_environment() {
        // Invented secrets for the test.
        let dir = tempfile::tempdir().unwrap();
        fs::write(dir.path().join("broker.pass"), "s3cret-from-file\n").unwrap();
        let text = with_broker(
            "url = \"mqtt://127.0.0.1\"\nusername = \"eqwatch\"\npassword_file = \"broker.pass\"",
        );
        let s = match check_in(&text, dir.path()) {
            Ok(s) => s,
            Err(e) => panic!("{e}"),
        };
        assert_eq!(s.broker.password.as_deref(), Some("s3cret-from-file"));
        assert_eq!(s.broker.username.as_deref(), Some("eqwatch"));

        let env_text = with_broker(
            "url = \"mqtt://127.0.0.1\"\nusername = \"eqwatch\"\npassword_env = \"EQWATCH_TEST_PASSWORD_5C1D\"",
        );
        let env = |name: &str| {
            if name == "EQWATCH_TEST_PASSWORD_5C1D" {
                Ok("s3cret-from-env".to_string())
            } else {
                Err(VarError::NotPresent)
            }
        };
        let s = match from_str_with_env(&env_text, dir.path(), &env) {
            Ok(s) => s,
            Err(e) => panic!("{e}"),
        };
        assert_eq!(s.broker.password.as_deref(), Some("s3cret-from-env"));

        // The process environment: a name no one sets.
        let unset = with_broker(
            "url = \"mqtt://127.0.0.1\"\nusername = \"eqwatch\"\npassword_env = \"EQWATCH_TEST_UNSET_9E42B7_PASSWORD\"",
        );
        match from_str(&unset, dir.path()) {
            Ok(_) => panic!("an unset variable was accepted"),
            Err(e) => assert_problems(
                "unset",
                &e,
                &[(
                    "broker.password_env",
                    "environment variable EQWATCH_TEST_UNSET_9E42B7_PASSWORD is not set",
                )],
            ),
        }

        let missing = with_broker(
            "url = \"mqtt://127.0.0.1\"\nusername = \"eqwatch\"\npassword_file = \"nowhere.pass\"",
        );
        let e = match check_in(&missing, dir.path()) {
            Ok(_) => panic!("a missing password file was accepted"),
            Err(e) => e,
        };
        assert_problems(
            "missing file",
            &e,
            &[("broker.password_file", "nowhere.pass: no such file")],
        );

        // MQTT 3.1.1 sends a password only with a user name; MQTT 5 need not.
        let no_user = with_broker("url = \"mqtt://127.0.0.1\"\npassword_file = \"broker.pass\"");
        let e = match check_in(&no_user, dir.path()) {
            Ok(_) => panic!("a password without user was accepted for 3.1.1"),
            Err(e) => e,
        };
        assert_problems("no user", &e, &[("broker.username", "missing; MQTT 3.1.1")]);
        // MQTT 5 is refused as a whole until the client speaks it (one problem only).
        let v5 = no_user.replace("[broker]\n", "[broker]\nprotocol = \"5\"\n");
        let e = check_in(&v5, dir.path()).expect_err("MQTT 5 is not supported yet");
        assert_problems(
            "v5",
            &e,
            &[("broker.protocol", "not supported by this build")],
        );
    }

    #[test]
    fn broker_url_and_tls_files() {
        // Invented broker addresses and files for the test.
        let dir = tempfile::tempdir().unwrap();
        fs::write(
            dir.path().join("ca.pem"),
            "invented certificate for the test\n",
        )
        .unwrap();
        let text = with_broker("url = \"mqtts://broker.baw1.invalid\"\nca_file = \"ca.pem\"");
        let s = match check_in(&text, dir.path()) {
            Ok(s) => s,
            Err(e) => panic!("{e}"),
        };
        assert!(s.broker.tls);
        assert_eq!(s.broker.host, "broker.baw1.invalid");
        assert_eq!(s.broker.port, 8883, "mqtts default port");
        assert_eq!(s.broker.ca_file, Some(dir.path().join("ca.pem")));

        let text = with_broker(
            "url = \"mqtts://broker.baw1.invalid:8884\"\nca_file = \"absent.pem\"\nclient_cert_file = \"ca.pem\"",
        );
        let e = match check_in(&text, dir.path()) {
            Ok(_) => panic!("a missing ca file was accepted"),
            Err(e) => e,
        };
        assert_problems(
            "tls",
            &e,
            &[
                ("broker.ca_file", "absent.pem: no such file"),
                (
                    "broker.client_key_file",
                    "missing; a client certificate needs its key",
                ),
            ],
        );

        let s = check(&with_broker("url = \"MQTT://[::1]\"")).unwrap();
        assert_eq!((s.broker.host.as_str(), s.broker.port), ("::1", 1883));
        let s = check(&with_broker("url = \"mqtt://Broker.BAW1.invalid:1884/\"")).unwrap();
        assert_eq!(
            (s.broker.host.as_str(), s.broker.port),
            ("Broker.BAW1.invalid", 1884)
        );
        for (url, needle) in [
            ("tcp://127.0.0.1:1883", "unknown scheme"),
            ("mqtt://", "has no host"),
            ("mqtt://::1", "IPv6 address in brackets"),
            ("mqtt://user:pw@127.0.0.1", "carries user information"),
            ("mqtt://127.0.0.1/topic", "has a path"),
        ] {
            let e = refused(&with_broker(&format!("url = \"{url}\"")));
            assert_problems(url, &e, &[("broker.url", needle)]);
        }
    }

    #[test]
    fn broker_limits() {
        // Invented broker settings for the test.
        let base = "url = \"mqtt://127.0.0.1\"\n";
        let ok = |extra: &str| match check(&with_broker(&format!("{base}{extra}"))) {
            Ok(s) => s.broker,
            Err(e) => panic!("{extra}: {e}"),
        };
        let b = ok("");
        assert_eq!(b.client_id, "eqwatch-baw1", "default client id");
        assert_eq!(b.keep_alive, Duration::from_secs(30));
        assert_eq!(b.session_expiry, Duration::ZERO);
        assert_eq!(b.inflight, 64);
        assert_eq!(b.max_packet_bytes, 262_144);
        assert_eq!(
            ok("keep_alive = \"5 s\"").keep_alive,
            Duration::from_secs(5)
        );
        assert_eq!(ok("inflight = 65535").inflight, 65_535);
        assert_eq!(ok("max_packet_bytes = 1024").max_packet_bytes, 1024);
        let long_id = "client_id = \"eqwatch-brackwater-train-1\"\n";
        assert!(
            check(&with_broker(&format!("{base}{long_id}"))).is_err(),
            "MQTT 3.1.1 refuses ids over 23 bytes"
        );
        for (extra, path, needle) in [
            (
                "keep_alive = \"5.5 s\"",
                "broker.keep_alive",
                "not a whole number of seconds",
            ),
            (
                "keep_alive = \"1 d\"",
                "broker.keep_alive",
                "above the MQTT limit of 65535 s",
            ),
            (
                "keep_alive = \"0 s\"",
                "broker.keep_alive",
                "must be above zero",
            ),
            (
                "session_expiry = \"200 y\"",
                "broker.session_expiry",
                "unknown unit \"y\"",
            ),
            (
                "inflight = 65536",
                "broker.inflight",
                "65536 is outside 1 to 65535",
            ),
            (
                "inflight = -1",
                "broker.inflight",
                "-1 is outside 1 to 65535",
            ),
            (
                "max_packet_bytes = 268435457",
                "broker.max_packet_bytes",
                "is outside 1024",
            ),
            ("client_id = \"\"", "broker.client_id", "is empty"),
            (
                "protocol = \"4\"",
                "broker.protocol",
                "expected \"3.1.1\" or \"5\"",
            ),
            (
                "reconnect_min = \"0 s\"",
                "broker.reconnect_min",
                "must be above zero",
            ),
        ] {
            let e = refused(&with_broker(&format!("{base}{extra}")));
            assert_problems(extra, &e, &[(path, needle)]);
        }
        // The default client id is checked too.
        let text =
            with_broker(base).replace("site = \"baw1\"", "site = \"brackwater-ammonia-works-1\"");
        let e = refused(&text);
        assert_problems(
            "default id",
            &e,
            &[(
                "broker.client_id",
                "(the default, eqwatch-<site>; set broker.client_id)",
            )],
        );
    }

    #[test]
    fn http_and_prefix_options() {
        // Invented config for the test.
        let base = with_broker("url = \"mqtt://127.0.0.1\"");
        let off = format!("{base}\n[http]\nlisten = \"off\"\n");
        assert_eq!(check(&off).unwrap().http_listen, None);
        let v6 = format!("{base}\n[http]\nlisten = \"[::1]:9500\"\n");
        assert_eq!(
            check(&v6).unwrap().http_listen,
            Some("[::1]:9500".parse().unwrap())
        );
        let prefix = base.replace(
            "site = \"baw1\"",
            "site = \"baw1\"\ntopic_prefix = \"plant/eq/\"\natmosphere = \"0.3 bar\"",
        );
        let e = refused(&prefix);
        assert_problems(
            "prefix",
            &e,
            &[
                ("topic_prefix", "ends with `/`"),
                ("atmosphere", "expected 0.5 to 1.1 bar absolute"),
            ],
        );
        let atm = base.replace(
            "site = \"baw1\"",
            "site = \"baw1\"\natmosphere = \"950 mbar\"",
        );
        assert!((check(&atm).unwrap().atmosphere_bar - 0.95).abs() < 1e-12);
    }

    #[test]
    fn json_pointers_are_checked() {
        // Invented config for the test.
        let text = with_broker("url = \"mqtt://127.0.0.1\"").replace(
            "unit = \"degC\"",
            "unit = \"degC\"\nvalue_pointer = \"value\"\nts_pointer = \"/a~2b\"\nquality_pointer = \"\"",
        );
        let e = refused(&text);
        assert_problems(
            "pointers",
            &e,
            &[
                (
                    "reactors.hts1.temperature[0].value_pointer",
                    "is not a JSON Pointer (RFC 6901)",
                ),
                (
                    "reactors.hts1.temperature[0].ts_pointer",
                    "`~` must be written ~0",
                ),
            ],
        );
        let text = with_broker("url = \"mqtt://127.0.0.1\"").replace(
            "unit = \"degC\"",
            "unit = \"degC\"\nvalue_pointer = \"/data/0/v\"\nts_pointer = \"\"\nquality_pointer = \"/q~1flag\"",
        );
        let s = check(&text).unwrap();
        assert_eq!(
            s.reactors[0].wiring.temperatures[0].decoder,
            ScalarDecoder::Json {
                value_pointer: "/data/0/v".into(),
                ts_pointer: None,
                quality_pointer: Some("/q~1flag".into()),
                unit_pointer: Some("/unit".into()),
            }
        );
    }

    #[test]
    fn peng_robinson_needs_critical_constants() {
        // Invented species file for the test: Ar with the built-in NASA 7 data
        // (data/species.toml, McBride, Gordon & Reno 1993) but no critical constants.
        let dir = tempfile::tempdir().unwrap();
        fs::write(
            dir.path().join("ar-no-critical.toml"),
            r#"
[[species]]
name = "Ar"
elements = { Ar = 1 }
source = "invented for the test: built-in Ar polynomial without critical constants"

[[species.nasa7]]
t_min_k = 200.0
t_max_k = 6000.0
coefficients = [2.5, 0.0, 0.0, 0.0, 0.0, -745.375, 4.37967491]
"#,
        )
        .unwrap();
        let text = r#"site = "baw1"
species_files = ["ar-no-critical.toml"]

[broker]
url = "mqtt://127.0.0.1"

[journal]
dir = "var/journal"

[reactors.amc1]
reactions = [{ equation = "N2 + 3 H2 = 2 NH3" }]
eos = "peng-robinson"

[reactors.amc1.composition]
topic = "baw1/amc1/AI-501"
basis = "wet"
components = ["H2", "N2", "NH3", "Ar", "CH4"]
max_age = "15 min"

[[reactors.amc1.temperature]]
topic = "baw1/amc1/TI-505"
unit = "degC"
max_age = "2 min"

[reactors.amc1.pressure]
topic = "baw1/amc1/PI-502"
unit = "barg"
max_age = "2 min"
"#
        .to_string();
        let e = match check_in(&text, dir.path()) {
            Ok(_) => panic!("peng-robinson without Ar constants was accepted"),
            Err(e) => e,
        };
        assert_problems(
            "peng-robinson",
            &e,
            &[(
                "reactors.amc1.eos",
                "peng-robinson needs critical constants (tc_k, pc_bar, omega) for: Ar",
            )],
        );
        let ideal = text.replace("eos = \"peng-robinson\"", "eos = \"ideal\"");
        assert!(check_in(&ideal, dir.path()).is_ok());
    }

    #[test]
    fn per_component_number_decoder_and_defaults() {
        // Invented config for the test: bare-number messages per component.
        let text = with_broker("url = \"mqtt://127.0.0.1\"").replace(
            "topic = \"baw1/hts1/AI-201\"",
            r#"topics = { H2 = "baw1/hts1/AI-201/H2", n2 = "baw1/hts1/AI-201/N2", CO = "baw1/hts1/AI-201/CO", CO2 = "baw1/hts1/AI-201/CO2", CH4 = "baw1/hts1/AI-201/CH4", Ar = "baw1/hts1/AI-201/Ar" }
decoder = "number"
unit = "ppm"
lag = "2 min"
sum_tolerance = "0.5 %""#,
        );
        let s = check(&text).unwrap();
        let c = &s.reactors[0].spec.composition;
        assert_eq!(
            c.tag, "baw1/hts1/AI-201",
            "default tag: the topics' common prefix"
        );
        assert_eq!(c.unit, CompositionUnit::Ppm);
        assert_eq!(c.lag, Duration::from_secs(120));
        assert!((c.sum_tolerance - 0.005).abs() < 1e-15);
        match &s.reactors[0].wiring.composition {
            CompositionSource::PerComponent { topics, decoder } => {
                assert_eq!(*decoder, ScalarDecoder::Number);
                assert_eq!(
                    topics[1],
                    ("N2".to_string(), "baw1/hts1/AI-201/N2".to_string())
                );
            }
            other => panic!("{other:?}"),
        }
        assert_eq!(s.reactors[0].spec.name, "hts1", "default name: the id");
        assert_eq!(
            s.reactors[0].spec.pressure.tag, "baw1/hts1/PI-202",
            "default tag: the topic"
        );
    }

    #[test]
    fn uncertainty_and_transient_units() {
        // Invented config for the test; 1 degF = 5/9 K, 1 psi = 0.06894757293 bar (NIST SP 811).
        let text = with_broker("url = \"mqtt://127.0.0.1\"").replace(
            "[reactors.hts1.composition]",
            "uncertainty = { temperature = \"3.6 degF\", pressure = \"10 psi\", composition = \"1.5 %\", steam_ratio = \"4 %\" }\ntransient = \"0.1 K/s\"\nband = 0.02\nkey_component = \"H2\"\n\n[reactors.hts1.composition]",
        );
        let s = check(&text).unwrap();
        let r = &s.reactors[0];
        assert!((r.spec.uncertainty.temperature_k - 2.0).abs() < 1e-12);
        assert!((r.spec.uncertainty.pressure_bar - 0.689_475_729_3).abs() < 1e-9);
        assert!((r.spec.uncertainty.composition_rel - 0.015).abs() < 1e-15);
        assert!((r.spec.uncertainty.steam_ratio_rel - 0.04).abs() < 1e-15);
        assert!((r.spec.transient_k_per_min - 6.0).abs() < 1e-12);
        assert_eq!(r.spec.model.band_ln, 0.02);
        assert_eq!(s.species.get(r.spec.key_component).name, "H2");

        let bad = text.replace("key_component = \"H2\"", "key_component = \"N2\"");
        assert_problems(
            "key",
            &refused(&bad),
            &[(
                "reactors.hts1.key_component",
                "N2 is not a species of the reactions",
            )],
        );
    }
}
