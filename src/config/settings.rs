//! The validated settings: what the rest of eqwatch takes from the configuration (broker,
//! journal, reactors as a core spec plus their wiring: topics, decoders, JSON Pointers; who
//! may send commands).

use std::net::SocketAddr;
use std::path::PathBuf;
use std::time::Duration;

use crate::monitor::spec::{InputSpec, ReactorSpec, SteamRatioSpec};
use crate::thermo::species::SpeciesDb;
use crate::units::ScalarUnit;

/// Validated settings of one eqwatch process.
#[derive(Debug, Clone)]
pub struct Settings {
    /// Site name (letters, digits, `-`, `_`).
    pub site: String,
    /// This daemon's shard of the site, when several daemons share one prefix, each
    /// owning its own reactors (letters, digits, `-`, `_`).
    pub shard: Option<String>,
    /// Output topic prefix, default `eqwatch/<site>`; no wildcards, no trailing `/`.
    pub topic_prefix: String,
    /// `metrics_topic = true`: after each result, a flat metrics message on
    /// `<prefix>/<reactor>/metrics` (QoS 1, not retained) for time-series collectors.
    pub metrics_topic: bool,
    pub broker: BrokerSettings,
    pub journal: JournalSettings,
    /// `None` when `[http] listen = "off"`; default 127.0.0.1:9873.
    pub http_listen: Option<SocketAddr>,
    /// `[http.users.<name>]`: who may log in to the live page, sorted by name.
    pub http_users: Vec<crate::config::password::HttpUser>,
    /// Site atmospheric pressure for gauge readings, bar (default 1.01325).
    pub atmosphere_bar: f64,
    /// Built-in species plus the configured species files.
    pub species: SpeciesDb,
    pub reactors: Vec<ReactorSettings>,
    /// Who may send operator commands.
    pub commands: CommandSettings,
    /// `[sparkplug]`, when present.
    pub sparkplug: Option<SparkplugSettings>,
    /// `[trains.<id>]`: units (or beds) summarised together.
    pub trains: Vec<TrainSettings>,
}

/// A train of units or the beds of one converter, in process order.
#[derive(Debug, Clone, PartialEq)]
pub struct TrainSettings {
    pub id: String,
    pub name: String,
    /// Indices into [`Settings::reactors`].
    pub members: Vec<usize>,
}

/// eqwatch's Sparkplug B connection (`[sparkplug]`): its own client id, clean session.
#[derive(Debug, Clone, PartialEq)]
pub struct SparkplugSettings {
    /// Default: the broker's client id with `-spb` (shortened like the result link's).
    pub client_id: Option<String>,
    /// eqwatch's group as an edge node (default: the site).
    pub group_id: String,
    /// eqwatch's edge node id (default `eqwatch`, or `eqwatch-<shard>`).
    pub edge_node_id: String,
    /// Publish results as an edge node (NBIRTH/DBIRTH/DDATA); default true.
    pub publish: bool,
    /// When set, eqwatch publishes `spBv1.0/STATE/<host_id>` as a host application.
    pub host_id: Option<String>,
    /// How long a message after a sequence gap waits for the missing one before a
    /// rebirth is requested.
    pub reorder_timeout: Duration,
}

/// An input on a Sparkplug metric: `spb:<group>/<edge node>[/<device>]:<metric name>`
/// in place of a topic (Sparkplug ids never contain `/`, `+` or `#`; metric names may
/// contain `/`, so the metric follows the first `:` after the ids).
#[derive(Debug, Clone, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct SpbRef {
    pub group: String,
    pub node: String,
    pub device: Option<String>,
    pub metric: String,
}

impl SpbRef {
    pub const PREFIX: &'static str = "spb:";

    /// Parses `spb:G/N[/D]:metric`; `None` when `text` is not a Sparkplug reference,
    /// `Some(Err)` with what is wrong when it is one but malformed.
    pub fn parse(text: &str) -> Option<Result<Self, String>> {
        let rest = text.strip_prefix(Self::PREFIX)?;
        Some((|| {
            let (ids, metric) = rest.split_once(':').ok_or_else(|| {
                format!("\"{text}\": expected spb:<group>/<edge node>[/<device>]:<metric name>")
            })?;
            if metric.is_empty() {
                return Err(format!("\"{text}\": the metric name after `:` is empty"));
            }
            let parts: Vec<&str> = ids.split('/').collect();
            if !(2..=3).contains(&parts.len())
                || parts.iter().any(|p| p.is_empty() || p.contains(['+', '#']))
            {
                return Err(format!(
                    "\"{text}\": the ids before `:` must be <group>/<edge node> or <group>/<edge node>/<device>, none empty, no `+` or `#`"
                ));
            }
            Ok(Self {
                group: parts[0].to_string(),
                node: parts[1].to_string(),
                device: parts.get(2).map(|d| d.to_string()),
                metric: metric.to_string(),
            })
        })())
    }

    /// The canonical text (what routing matches on).
    pub fn key(&self) -> String {
        match &self.device {
            Some(d) => format!("spb:{}/{}/{d}:{}", self.group, self.node, self.metric),
            None => format!("spb:{}/{}:{}", self.group, self.node, self.metric),
        }
    }
}

impl Settings {
    /// A topic of the whole daemon rather than of one reactor (`status`, `alert`,
    /// `alarms`): `<prefix>/<name>`, or `<prefix>/<name>/<shard>` for a sharded daemon,
    /// so shards sharing a prefix never overwrite each other's retained status, will
    /// or plant-wide alarm count.
    pub fn daemon_topic(&self, name: &str) -> String {
        match &self.shard {
            Some(s) => format!("{}/{name}/{s}", self.topic_prefix),
            None => format!("{}/{name}", self.topic_prefix),
        }
    }
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
    /// How long one connection attempt (TCP, TLS, CONNECT/CONNACK) may take; also the
    /// limit on one write to the broker.
    pub connect_timeout: Duration,
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
    /// Results held in memory at most while the disk does not take them.
    pub memory_max_bytes: usize,
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
pub(crate) struct ScalarSettings {
    /// Instrument tag or a short name, for results and logs (default: the topic).
    pub tag: String,
    pub topic: String,
    pub decoder: ScalarDecoder,
    pub unit: ScalarUnit,
    /// Older readings are stale.
    pub max_age: Duration,
    /// Readings outside this range are implausible (monitor units).
    pub plausible: crate::monitor::spec::Plausible,
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
pub(crate) enum SteamRatioSettings {
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
    /// The bed profile's thermocouples, inlet first.
    pub bed: Vec<ScalarSource>,
    /// The flow meters (same order as the spec's flows).
    pub flows: Vec<ScalarSource>,
    /// The inlet analyser of the reconciliation.
    pub inlet_composition: Option<CompositionSource>,
}

/// One configured reactor: what the monitor needs ([`ReactorSpec`]) and where its
/// inputs arrive ([`Wiring`]).
#[derive(Debug, Clone)]
pub struct ReactorSettings {
    pub spec: ReactorSpec,
    pub wiring: Wiring,
}

impl ScalarSettings {
    pub(crate) fn split(self) -> (InputSpec, ScalarSource) {
        (
            InputSpec {
                tag: self.tag,
                origin: self.topic.clone(),
                unit: self.unit,
                max_age: self.max_age,
                plausible: self.plausible,
            },
            ScalarSource {
                topic: self.topic,
                decoder: self.decoder,
            },
        )
    }
}

impl SteamRatioSettings {
    pub(crate) fn split(self) -> (SteamRatioSpec, Option<ScalarSource>) {
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

/// Who may send commands (the payload's `user` or `client_id` must be listed; the
/// broker's ACL decides who may publish on the command topics at all).
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct CommandSettings {
    pub allowed_users: Vec<String>,
    pub allowed_clients: Vec<String>,
}

impl CommandSettings {
    pub fn allows(&self, user: Option<&str>, client: Option<&str>) -> bool {
        user.is_some_and(|u| self.allowed_users.iter().any(|a| a == u))
            || client.is_some_and(|c| self.allowed_clients.iter().any(|a| a == c))
    }
}
