//! Eclipse Sparkplug B (specification 3.0): the pure half. No I/O and no clock; the
//! link in `daemon/sparkplug.rs` moves the bytes and passes the time in.
//!
//! - [`Consumer`]: eqwatch as a host application reading edge nodes. Births (NBIRTH,
//!   DBIRTH) bind metric names to aliases and reset the node's sequence; data (NDATA,
//!   DDATA) must follow with `seq` one more than the last (mod 256). A message after a
//!   gap waits up to the reorder timeout for the missing one, then a rebirth is
//!   requested (NCMD `Node Control/Rebirth`) and the node's data are ignored until its
//!   NBIRTH. Data from a node eqwatch has no birth for also get a rebirth request. An
//!   NDEATH whose `bdSeq` matches the node's NBIRTH (a will that overtook a newer birth
//!   does not) and a DDEATH mark that node's or device's metrics stale: each configured
//!   input on them gets a `bad` reading, so no result is computed as good on a dead
//!   instrument's last value. Only metrics named by the configuration (`spb:` inputs)
//!   become inputs; each becomes a JSON reading `{"ts", "value", "quality"}` on its
//!   `spb:` key, decoded like any other input. Quality: the metric property `Quality`
//!   when present (OPC codes: 192 and up good, 64 and up uncertain, below bad; common
//!   practice of Sparkplug gateways), else good.
//! - [`EdgeNode`]: eqwatch's results as an edge node: NBIRTH (seq 0, `bdSeq`, `Node
//!   Control/Rebirth`), one device per reactor (DBIRTH with every figure, its alias and
//!   its latest value), then DDATA with aliases only; results that reach it late (from
//!   the journal after a restart, or held while its connection was down) are marked
//!   `is_historical`. The will is the NDEATH with the same `bdSeq`.

use std::collections::{BTreeMap, HashMap, HashSet};

use prost::Message as _;
use serde_json::Value;

use super::sparkplug_b::Payload;
use super::sparkplug_b::payload::{Metric, metric};
use crate::config::SpbRef;

/// The Sparkplug B topic namespace.
pub(crate) const NAMESPACE: &str = "spBv1.0";
/// The node command metric that asks for a rebirth (Sparkplug 3.0, Node Control).
pub(crate) const REBIRTH: &str = "Node Control/Rebirth";

/// Sparkplug datatypes used here (Sparkplug 3.0, data types).
pub(crate) mod datatype {
    pub(crate) const INT64: u32 = 4;
    pub(crate) const UINT64: u32 = 8;
    pub(crate) const DOUBLE: u32 = 10;
    pub(crate) const BOOLEAN: u32 = 11;
    pub(crate) const STRING: u32 = 12;
}

/// An edge node: group and edge node id.
#[derive(Debug, Clone, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub(crate) struct NodeId {
    pub(crate) group: String,
    pub(crate) node: String,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Kind {
    NBirth,
    NDeath,
    DBirth,
    DDeath,
    NData,
    DData,
    NCmd,
    DCmd,
}

/// A parsed Sparkplug topic: `spBv1.0/<group>/<kind>/<edge node>[/<device>]`.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct Topic {
    pub(crate) kind: Kind,
    pub(crate) node: NodeId,
    pub(crate) device: Option<String>,
}

impl Topic {
    pub(crate) fn parse(topic: &str) -> Option<Self> {
        let mut it = topic.split('/');
        if it.next()? != NAMESPACE {
            return None;
        }
        let group = it.next()?;
        let kind = match it.next()? {
            "NBIRTH" => Kind::NBirth,
            "NDEATH" => Kind::NDeath,
            "DBIRTH" => Kind::DBirth,
            "DDEATH" => Kind::DDeath,
            "NDATA" => Kind::NData,
            "DDATA" => Kind::DData,
            "NCMD" => Kind::NCmd,
            "DCMD" => Kind::DCmd,
            _ => return None,
        };
        let node = it.next()?;
        let device = it.next();
        if it.next().is_some() || group.is_empty() || node.is_empty() {
            return None;
        }
        let device_kind = matches!(kind, Kind::DBirth | Kind::DDeath | Kind::DData | Kind::DCmd);
        if device_kind != device.is_some() {
            return None;
        }
        Some(Self {
            kind,
            node: NodeId {
                group: group.into(),
                node: node.into(),
            },
            device: device.map(str::to_string),
        })
    }
}

/// A topic of `node` (and `device`) for `kind`.
pub(crate) fn topic(kind: &str, node: &NodeId, device: Option<&str>) -> String {
    match device {
        Some(d) => format!("{NAMESPACE}/{}/{kind}/{}/{d}", node.group, node.node),
        None => format!("{NAMESPACE}/{}/{kind}/{}", node.group, node.node),
    }
}

/// What the consumer asks of the link.
#[derive(Debug, Clone, PartialEq)]
pub(crate) enum Event {
    /// A reading for a configured input: the `spb:` key and a JSON payload.
    Input { key: String, payload: String },
    /// Publish this rebirth request (NCMD, QoS 0).
    Rebirth {
        topic: String,
        payload: Vec<u8>,
        why: &'static str,
    },
}

/// Counters the link publishes as metrics.
#[derive(Debug, Default, Clone, Copy, PartialEq, Eq)]
pub(crate) struct ConsumerCounts {
    pub messages: u64,
    pub undecodable: u64,
    pub gaps: u64,
    pub rebirths_requested: u64,
    pub deaths: u64,
    pub inputs: u64,
}

#[derive(Debug, Default)]
struct NodeState {
    /// The bdSeq of the NBIRTH in force; `None`: no birth seen (or dead).
    bd_seq: Option<u64>,
    /// The seq the next message must carry.
    next_seq: u8,
    /// (device, alias) → input key, from the births (configured metrics only).
    aliases: HashMap<(Option<String>, u64), String>,
    /// Messages after a gap, by seq, with when they came.
    held: BTreeMap<u8, (i64, Topic, Payload)>,
    gap_since_ms: Option<i64>,
    /// When the last rebirth request went out (one per reorder timeout at most).
    asked_ms: Option<i64>,
    /// The last value of each configured input on this node (for stale marking).
    last: HashMap<String, f64>,
}

/// eqwatch as a Sparkplug host application reading the edge nodes its inputs name.
pub(crate) struct Consumer {
    wanted: HashSet<String>,
    nodes: HashMap<NodeId, NodeState>,
    reorder_ms: i64,
    pub(crate) counts: ConsumerCounts,
}

/// Messages held after a gap at most per node (then the rebirth is asked at once).
const HELD_MAX: usize = 64;

impl Consumer {
    /// `inputs`: the configured `spb:` references; `reorder_ms`: the reorder timeout.
    pub(crate) fn new(inputs: &[SpbRef], reorder_ms: i64) -> Self {
        Self {
            wanted: inputs.iter().map(SpbRef::key).collect(),
            nodes: inputs
                .iter()
                .map(|r| {
                    (
                        NodeId {
                            group: r.group.clone(),
                            node: r.node.clone(),
                        },
                        NodeState::default(),
                    )
                })
                .collect(),
            reorder_ms,
            counts: ConsumerCounts::default(),
        }
    }

    /// The edge nodes to subscribe to.
    pub(crate) fn nodes(&self) -> Vec<NodeId> {
        let mut v: Vec<NodeId> = self.nodes.keys().cloned().collect();
        v.sort();
        v
    }

    /// Subscriptions: every message type of every node named (commands excluded by
    /// the consumer, which ignores them).
    pub(crate) fn subscriptions(&self) -> Vec<String> {
        self.nodes()
            .iter()
            .flat_map(|n| {
                [
                    format!("{NAMESPACE}/{}/+/{}", n.group, n.node),
                    format!("{NAMESPACE}/{}/+/{}/+", n.group, n.node),
                ]
            })
            .collect()
    }

    /// One message from the broker.
    pub(crate) fn message(&mut self, topic: &str, bytes: &[u8], now_ms: i64) -> Vec<Event> {
        let mut out = Vec::new();
        let Some(t) = Topic::parse(topic) else {
            return out;
        };
        if matches!(t.kind, Kind::NCmd | Kind::DCmd) || !self.nodes.contains_key(&t.node) {
            return out;
        }
        self.counts.messages += 1;
        let Ok(p) = Payload::decode(bytes) else {
            self.counts.undecodable += 1;
            // A node whose messages cannot be read cannot be followed: ask again.
            self.ask_rebirth(&t.node, now_ms, "undecodable payload", &mut out);
            return out;
        };
        match t.kind {
            Kind::NBirth => self.birth(&t, &p, now_ms, &mut out),
            Kind::NDeath => self.death(&t, &p, now_ms, &mut out),
            _ => self.sequenced(t, p, now_ms, &mut out),
        }
        out
    }

    /// Reorder timeouts: a gap not filled in time asks for a rebirth.
    pub(crate) fn tick(&mut self, now_ms: i64) -> Vec<Event> {
        let mut out = Vec::new();
        let late: Vec<NodeId> = self
            .nodes
            .iter()
            .filter(|(_, s)| {
                s.gap_since_ms
                    .is_some_and(|g| now_ms - g >= self.reorder_ms)
            })
            .map(|(n, _)| n.clone())
            .collect();
        for n in late {
            if let Some(s) = self.nodes.get_mut(&n) {
                s.held.clear();
                s.gap_since_ms = None;
                s.bd_seq = None;
            }
            self.ask_rebirth(
                &n,
                now_ms,
                "sequence gap not filled in the reorder timeout",
                &mut out,
            );
        }
        out
    }

    fn birth(&mut self, t: &Topic, p: &Payload, now_ms: i64, out: &mut Vec<Event>) {
        let bd = bd_seq_of(p);
        let Some(s) = self.nodes.get_mut(&t.node) else {
            return;
        };
        s.aliases.clear();
        s.held.clear();
        s.gap_since_ms = None;
        s.bd_seq = Some(bd.unwrap_or(0));
        s.next_seq = (p.seq.unwrap_or(0) as u8).wrapping_add(1);
        self.values(t, p, now_ms, out);
    }

    fn death(&mut self, t: &Topic, p: &Payload, now_ms: i64, out: &mut Vec<Event>) {
        let bd = bd_seq_of(p);
        let Some(s) = self.nodes.get_mut(&t.node) else {
            return;
        };
        // A will from an older session (its bdSeq is not the birth's) is not this one's.
        if s.bd_seq.is_none() || (bd.is_some() && bd != s.bd_seq) {
            return;
        }
        s.bd_seq = None;
        s.held.clear();
        s.gap_since_ms = None;
        self.counts.deaths += 1;
        let prefix = format!("spb:{}/{}", t.node.group, t.node.node);
        self.stale(&t.node, |k| k.starts_with(&prefix), now_ms, out);
    }

    /// Messages that carry `seq`: in order, or held after a gap.
    fn sequenced(&mut self, t: Topic, p: Payload, now_ms: i64, out: &mut Vec<Event>) {
        let Some(s) = self.nodes.get_mut(&t.node) else {
            return;
        };
        if s.bd_seq.is_none() {
            let node = t.node.clone();
            self.ask_rebirth(&node, now_ms, "data before a birth", out);
            return;
        }
        let seq = p.seq.unwrap_or(u64::MAX);
        if seq > 255 {
            let node = t.node.clone();
            self.ask_rebirth(&node, now_ms, "seq missing or over 255", out);
            return;
        }
        let seq = seq as u8;
        if seq != s.next_seq {
            // Already seen (a duplicate from the broker) is dropped; ahead is held.
            let behind = s.next_seq.wrapping_sub(seq) < 128;
            if behind {
                return;
            }
            if s.gap_since_ms.is_none() {
                s.gap_since_ms = Some(now_ms);
                self.counts.gaps += 1;
            }
            s.held.insert(seq, (now_ms, t.clone(), p));
            if s.held.len() > HELD_MAX {
                s.held.clear();
                s.gap_since_ms = None;
                s.bd_seq = None;
                let node = t.node.clone();
                self.ask_rebirth(&node, now_ms, "too many messages after a sequence gap", out);
            }
            return;
        }
        s.next_seq = seq.wrapping_add(1);
        self.apply(&t, &p, now_ms, out);
        // Then whatever was waiting for this one.
        loop {
            let Some(s) = self.nodes.get_mut(&t.node) else {
                return;
            };
            let next = s.next_seq;
            let Some((_, ht, hp)) = s.held.remove(&next) else {
                if s.held.is_empty() {
                    s.gap_since_ms = None;
                }
                return;
            };
            s.next_seq = next.wrapping_add(1);
            self.apply(&ht, &hp, now_ms, out);
        }
    }

    fn apply(&mut self, t: &Topic, p: &Payload, now_ms: i64, out: &mut Vec<Event>) {
        match t.kind {
            Kind::DBirth => {
                if let Some(s) = self.nodes.get_mut(&t.node) {
                    s.aliases.retain(|(d, _), _| d != &t.device);
                }
                self.values(t, p, now_ms, out);
            }
            Kind::DDeath => {
                let prefix = format!(
                    "spb:{}/{}/{}:",
                    t.node.group,
                    t.node.node,
                    t.device.as_deref().unwrap_or_default()
                );
                self.stale(&t.node, |k| k.starts_with(&prefix), now_ms, out);
            }
            _ => self.values(t, p, now_ms, out),
        }
    }

    /// The configured metrics of a birth or data message, as readings.
    fn values(&mut self, t: &Topic, p: &Payload, now_ms: i64, out: &mut Vec<Event>) {
        let birth = matches!(t.kind, Kind::NBirth | Kind::DBirth);
        let Some(s) = self.nodes.get_mut(&t.node) else {
            return;
        };
        for m in &p.metrics {
            // Only configured metrics are kept (aliases included): a node with thousands
            // of metrics costs no memory for those eqwatch does not use.
            let key = match (&m.name, m.alias) {
                (Some(n), alias) => {
                    let key = SpbRef {
                        group: t.node.group.clone(),
                        node: t.node.node.clone(),
                        device: t.device.clone(),
                        metric: n.clone(),
                    }
                    .key();
                    if !self.wanted.contains(&key) {
                        continue;
                    }
                    if birth && let Some(a) = alias {
                        s.aliases.insert((t.device.clone(), a), key.clone());
                    }
                    key
                }
                (None, Some(a)) => match s.aliases.get(&(t.device.clone(), a)) {
                    Some(k) => k.clone(),
                    None => continue,
                },
                (None, None) => continue,
            };
            if m.is_null == Some(true) {
                continue;
            }
            let Some(v) = number(m) else { continue };
            let ts = m
                .timestamp
                .or(p.timestamp)
                .and_then(|t| i64::try_from(t).ok())
                .unwrap_or(now_ms);
            s.last.insert(key.clone(), v);
            self.counts.inputs += 1;
            out.push(Event::Input {
                payload: reading(ts, v, quality(m)),
                key,
            });
        }
    }

    fn stale(
        &mut self,
        node: &NodeId,
        pick: impl Fn(&str) -> bool,
        now_ms: i64,
        out: &mut Vec<Event>,
    ) {
        let Some(s) = self.nodes.get(node) else {
            return;
        };
        let mut keys: Vec<(&String, &f64)> = s.last.iter().filter(|(k, _)| pick(k)).collect();
        keys.sort_by(|a, b| a.0.cmp(b.0));
        for (k, v) in keys {
            out.push(Event::Input {
                key: k.clone(),
                payload: reading(now_ms, *v, "bad"),
            });
        }
    }

    fn ask_rebirth(&mut self, node: &NodeId, now_ms: i64, why: &'static str, out: &mut Vec<Event>) {
        let Some(s) = self.nodes.get_mut(node) else {
            return;
        };
        if s.asked_ms.is_some_and(|a| now_ms - a < self.reorder_ms) {
            return;
        }
        s.asked_ms = Some(now_ms);
        self.counts.rebirths_requested += 1;
        out.push(Event::Rebirth {
            topic: topic("NCMD", node, None),
            payload: rebirth_request(now_ms),
            why,
        });
    }
}

/// The `bdSeq` metric of a birth or death.
fn bd_seq_of(p: &Payload) -> Option<u64> {
    p.metrics
        .iter()
        .find(|m| m.name.as_deref() == Some("bdSeq"))
        .and_then(number)
        .map(|v| v as u64)
}

fn reading(ts: i64, v: f64, quality: &str) -> String {
    format!(
        r#"{{"ts":{ts},"value":{},"quality":"{quality}"}}"#,
        Value::from(v)
    )
}

/// A metric's numeric value (booleans as 0 and 1).
fn number(m: &Metric) -> Option<f64> {
    let v = match m.value.as_ref()? {
        metric::Value::IntValue(v) => f64::from(*v),
        // Int64 is sent as its two's-complement bits in long_value.
        metric::Value::LongValue(v) if m.datatype == Some(datatype::INT64) => *v as i64 as f64,
        metric::Value::LongValue(v) => *v as f64,
        metric::Value::FloatValue(v) => f64::from(*v),
        metric::Value::DoubleValue(v) => *v,
        metric::Value::BooleanValue(b) => f64::from(u8::from(*b)),
        _ => return None,
    };
    v.is_finite().then_some(v)
}

/// The metric's OPC quality property when present (192+ good, 64+ uncertain, else bad).
fn quality(m: &Metric) -> &'static str {
    use super::sparkplug_b::payload::property_value::Value as P;
    let Some(props) = &m.properties else {
        return "good";
    };
    let code = props
        .keys
        .iter()
        .position(|k| k.eq_ignore_ascii_case("quality"))
        .and_then(|i| props.values.get(i))
        .and_then(|v| match v.value.as_ref()? {
            P::IntValue(q) => Some(u64::from(*q)),
            P::LongValue(q) => Some(*q),
            _ => None,
        });
    match code {
        None => "good",
        Some(q) if q >= 192 => "good",
        Some(q) if q >= 64 => "uncertain",
        Some(_) => "bad",
    }
}

/// The NCMD payload asking for a rebirth.
pub(crate) fn rebirth_request(now_ms: i64) -> Vec<u8> {
    Payload {
        timestamp: u64::try_from(now_ms).ok(),
        metrics: vec![Metric {
            name: Some(REBIRTH.into()),
            timestamp: u64::try_from(now_ms).ok(),
            datatype: Some(datatype::BOOLEAN),
            value: Some(metric::Value::BooleanValue(true)),
            ..Metric::default()
        }],
        ..Payload::default()
    }
    .encode_to_vec()
}

/// Whether `bytes` (an NCMD payload) asks for a rebirth.
pub(crate) fn is_rebirth_request(bytes: &[u8]) -> bool {
    Payload::decode(bytes).is_ok_and(|p| {
        p.metrics.iter().any(|m| {
            m.name.as_deref() == Some(REBIRTH)
                && matches!(m.value, Some(metric::Value::BooleanValue(true)))
        })
    })
}

// ---------------------------------------------------------------------------
// eqwatch as an edge node

/// The figures of a result published per reactor: metric name, JSON Pointer into the
/// result, datatype.
pub(crate) const FIGURES: &[(&str, &str, u32)] = &[
    ("approach_k", "/approach_k", datatype::DOUBLE),
    (
        "approach_uncertainty_k",
        "/approach_uncertainty_k",
        datatype::DOUBLE,
    ),
    ("q_over_k", "/q_over_k", datatype::DOUBLE),
    (
        "affinity_j_per_mol",
        "/affinity_j_per_mol",
        datatype::DOUBLE,
    ),
    ("temperature_k", "/temperature_k", datatype::DOUBLE),
    ("pressure_bar", "/pressure_bar", datatype::DOUBLE),
    ("quality", "/quality", datatype::STRING),
    ("drift/ewma_k", "/drift/ewma_k", datatype::DOUBLE),
    ("drift/baseline_k", "/drift/baseline_k", datatype::DOUBLE),
    (
        "drift/trend_k_per_day",
        "/drift/trend_k_per_day",
        datatype::DOUBLE,
    ),
    ("seq", "/seq", datatype::UINT64),
];

/// eqwatch's edge node: sequence, bdSeq, aliases and each reactor's latest result.
pub(crate) struct EdgeNode {
    pub(crate) id: NodeId,
    reactors: Vec<String>,
    /// The session's bdSeq (the will's and the births').
    bd_seq: u64,
    next_bd_seq: u64,
    seq: u8,
    latest: Vec<Option<Value>>,
}

impl EdgeNode {
    /// `reactors`: the device ids, in configuration order (aliases follow it).
    pub(crate) fn new(id: NodeId, reactors: Vec<String>) -> Self {
        let n = reactors.len();
        Self {
            id,
            reactors,
            bd_seq: 0,
            next_bd_seq: 0,
            seq: 0,
            latest: vec![None; n],
        }
    }

    /// The alias of figure `f` of reactor `r` (1-based; 0 is not used).
    pub(crate) fn alias(r: usize, f: usize) -> u64 {
        (r * FIGURES.len() + f + 1) as u64
    }

    /// The will for the next connection: NDEATH with the next session's bdSeq (one more
    /// per connection, 0 to 255); the births of that connection carry the same.
    pub(crate) fn next_session_will(&mut self, now_ms: i64) -> (String, Vec<u8>) {
        self.bd_seq = self.next_bd_seq;
        self.next_bd_seq = (self.next_bd_seq + 1) % 256;
        self.death_now(now_ms)
    }

    /// The NDEATH of the current session (the will, or sent before a clean disconnect).
    pub(crate) fn death_now(&self, now_ms: i64) -> (String, Vec<u8>) {
        let bytes = Payload {
            timestamp: u64::try_from(now_ms).ok(),
            metrics: vec![bd_seq_metric(self.bd_seq, now_ms)],
            ..Payload::default()
        }
        .encode_to_vec();
        (topic("NDEATH", &self.id, None), bytes)
    }

    /// Keeps `result` as `reactor`'s latest (for the next births) without publishing.
    pub(crate) fn remember(&mut self, reactor: &str, result: &str) {
        if let (Some(r), Ok(v)) = (
            self.reactors.iter().position(|x| x == reactor),
            serde_json::from_str::<Value>(result),
        ) {
            self.latest[r] = Some(v);
        }
    }

    /// Connected with the will of [`EdgeNode::next_session_will`] (or asked for a
    /// rebirth): NBIRTH (seq 0) then a DBIRTH per reactor, with the latest values.
    pub(crate) fn births(&mut self, now_ms: i64) -> Vec<(String, Vec<u8>)> {
        self.seq = 0;
        let ts = u64::try_from(now_ms).ok();
        let mut out = Vec::with_capacity(self.reactors.len() + 1);
        let nbirth = Payload {
            timestamp: ts,
            seq: Some(0),
            metrics: vec![
                bd_seq_metric(self.bd_seq, now_ms),
                Metric {
                    name: Some(REBIRTH.into()),
                    timestamp: ts,
                    datatype: Some(datatype::BOOLEAN),
                    value: Some(metric::Value::BooleanValue(false)),
                    ..Metric::default()
                },
                Metric {
                    name: Some("Properties/advisory".into()),
                    timestamp: ts,
                    datatype: Some(datatype::STRING),
                    value: Some(metric::Value::StringValue(
                        super::result::ADVISORY_SHORT.into(),
                    )),
                    ..Metric::default()
                },
            ],
            ..Payload::default()
        };
        out.push((topic("NBIRTH", &self.id, None), nbirth.encode_to_vec()));
        for r in 0..self.reactors.len() {
            let metrics = (0..FIGURES.len())
                .map(|f| {
                    let mut m = figure(self.latest[r].as_ref(), f, ts);
                    m.name = Some(FIGURES[f].0.into());
                    m.alias = Some(Self::alias(r, f));
                    m
                })
                .collect();
            let p = Payload {
                timestamp: ts,
                seq: Some(u64::from(self.next_seq())),
                metrics,
                ..Payload::default()
            };
            out.push((
                topic("DBIRTH", &self.id, Some(&self.reactors[r])),
                p.encode_to_vec(),
            ));
        }
        out
    }

    /// A result (eqwatch's result JSON) of `reactor` as DDATA; `historical` for one
    /// that reaches the node late. `None` for an unknown reactor or unreadable JSON.
    pub(crate) fn data(
        &mut self,
        reactor: &str,
        result: &str,
        historical: bool,
        now_ms: i64,
    ) -> Option<(String, Vec<u8>)> {
        let r = self.reactors.iter().position(|x| x == reactor)?;
        let v: Value = serde_json::from_str(result).ok()?;
        let ts = v
            .get("sample_ts")
            .and_then(Value::as_str)
            .and_then(crate::timefmt::parse_rfc3339)
            .and_then(|t| u64::try_from(t).ok());
        let metrics = (0..FIGURES.len())
            .map(|f| {
                let mut m = figure(Some(&v), f, ts);
                m.alias = Some(Self::alias(r, f));
                m.is_historical = historical.then_some(true);
                m
            })
            .collect();
        if !historical {
            self.latest[r] = Some(v);
        }
        let p = Payload {
            timestamp: u64::try_from(now_ms).ok(),
            seq: Some(u64::from(self.next_seq())),
            metrics,
            ..Payload::default()
        };
        Some((topic("DDATA", &self.id, Some(reactor)), p.encode_to_vec()))
    }

    fn next_seq(&mut self) -> u8 {
        self.seq = self.seq.wrapping_add(1);
        self.seq
    }
}

fn bd_seq_metric(bd: u64, now_ms: i64) -> Metric {
    Metric {
        name: Some("bdSeq".into()),
        timestamp: u64::try_from(now_ms).ok(),
        datatype: Some(datatype::INT64),
        value: Some(metric::Value::LongValue(bd)),
        ..Metric::default()
    }
}

/// Figure `f` of a result (null when absent or not a number).
fn figure(v: Option<&Value>, f: usize, ts: Option<u64>) -> Metric {
    let (_, ptr, dt) = FIGURES[f];
    let x = v.and_then(|v| v.pointer(ptr));
    let value = match (dt, x) {
        (datatype::STRING, Some(Value::String(s))) => Some(metric::Value::StringValue(s.clone())),
        (datatype::UINT64, Some(n)) => n.as_u64().map(metric::Value::LongValue),
        (datatype::DOUBLE, Some(n)) => n.as_f64().map(metric::Value::DoubleValue),
        _ => None,
    };
    Metric {
        timestamp: ts,
        datatype: Some(dt),
        is_null: value.is_none().then_some(true),
        value,
        ..Metric::default()
    }
}

/// The primary host's STATE payload (Sparkplug 3.0: JSON, retained, QoS 1).
pub(crate) fn state_payload(online: bool, now_ms: i64) -> String {
    format!(r#"{{"online":{online},"timestamp":{now_ms}}}"#)
}

/// The STATE topic of host application `host_id`.
pub(crate) fn state_topic(host_id: &str) -> String {
    format!("{NAMESPACE}/STATE/{host_id}")
}

#[cfg(test)]
mod tests {
    //! Behaviour from the Sparkplug B 3.0 specification (Eclipse Foundation, 2022):
    //! topic namespace, seq 0..255 with NBIRTH at 0, aliases bound in births, bdSeq
    //! matching between NBIRTH and NDEATH, the Node Control/Rebirth command. Metric
    //! names and values are invented.

    use super::*;

    const T0: i64 = 1_796_083_200_000;

    fn refs() -> Vec<SpbRef> {
        ["spb:G1/EN1/AH1:TI-305A", "spb:G1/EN1:PI-302"]
            .iter()
            .map(|t| SpbRef::parse(t).expect("spb").expect("valid"))
            .collect()
    }

    fn m(name: Option<&str>, alias: Option<u64>, v: f64) -> Metric {
        Metric {
            name: name.map(str::to_string),
            alias,
            datatype: Some(datatype::DOUBLE),
            value: Some(metric::Value::DoubleValue(v)),
            ..Metric::default()
        }
    }

    fn pay(seq: u64, metrics: Vec<Metric>) -> Vec<u8> {
        Payload {
            timestamp: Some(T0 as u64),
            seq: Some(seq),
            metrics,
            ..Payload::default()
        }
        .encode_to_vec()
    }

    fn nbirth(bd: u64) -> Vec<u8> {
        pay(
            0,
            vec![bd_seq_metric(bd, T0), m(Some("PI-302"), Some(7), 29.0)],
        )
    }

    fn inputs(ev: &[Event]) -> Vec<(String, f64, String)> {
        ev.iter()
            .filter_map(|e| match e {
                Event::Input { key, payload } => {
                    let v: Value = serde_json::from_str(payload).expect("json");
                    Some((
                        key.clone(),
                        v["value"].as_f64().expect("value"),
                        v["quality"].as_str().expect("quality").to_string(),
                    ))
                }
                _ => None,
            })
            .collect()
    }

    fn rebirths(ev: &[Event]) -> usize {
        ev.iter()
            .filter(|e| matches!(e, Event::Rebirth { .. }))
            .count()
    }

    #[test]
    fn topics_parse_per_the_namespace() {
        let t = Topic::parse("spBv1.0/G1/DDATA/EN1/AH1").expect("topic");
        assert_eq!(t.kind, Kind::DData);
        assert_eq!(t.device.as_deref(), Some("AH1"));
        assert!(
            Topic::parse("spBv1.0/G1/NDATA/EN1/AH1").is_none(),
            "N types have no device"
        );
        assert!(
            Topic::parse("spBv1.0/G1/DDATA/EN1").is_none(),
            "D types have one"
        );
        assert!(Topic::parse("spAv1.0/G1/NDATA/EN1").is_none());
        assert_eq!(
            topic(
                "NCMD",
                &NodeId {
                    group: "G1".into(),
                    node: "EN1".into()
                },
                None
            ),
            "spBv1.0/G1/NCMD/EN1"
        );
    }

    #[test]
    fn births_bind_aliases_and_data_use_them() {
        let mut c = Consumer::new(&refs(), 2000);
        assert_eq!(
            c.subscriptions(),
            vec![
                "spBv1.0/G1/+/EN1".to_string(),
                "spBv1.0/G1/+/EN1/+".to_string()
            ]
        );
        let ev = c.message("spBv1.0/G1/NBIRTH/EN1", &nbirth(3), T0);
        assert_eq!(
            inputs(&ev),
            vec![("spb:G1/EN1:PI-302".into(), 29.0, "good".into())]
        );
        let db = pay(
            1,
            vec![
                m(Some("TI-305A"), Some(1), 220.0),
                m(Some("other"), Some(2), 1.0),
            ],
        );
        let ev = c.message("spBv1.0/G1/DBIRTH/EN1/AH1", &db, T0);
        assert_eq!(
            inputs(&ev),
            vec![("spb:G1/EN1/AH1:TI-305A".into(), 220.0, "good".into())]
        );
        // Data by alias only; an unconfigured metric is not an input.
        let dd = pay(2, vec![m(None, Some(1), 221.5), m(None, Some(2), 5.0)]);
        let ev = c.message("spBv1.0/G1/DDATA/EN1/AH1", &dd, T0 + 1000);
        assert_eq!(
            inputs(&ev),
            vec![("spb:G1/EN1/AH1:TI-305A".into(), 221.5, "good".into())]
        );
        assert_eq!(rebirths(&ev), 0);
    }

    #[test]
    fn a_gap_waits_for_the_missing_message_then_asks_for_a_rebirth() {
        let mut c = Consumer::new(&refs(), 2000);
        c.message("spBv1.0/G1/NBIRTH/EN1", &nbirth(0), T0);
        // seq 2 before 1: held, then both in order when 1 comes.
        let ev = c.message(
            "spBv1.0/G1/NDATA/EN1",
            &pay(2, vec![m(None, Some(7), 29.2)]),
            T0 + 10,
        );
        assert!(inputs(&ev).is_empty());
        let ev = c.message(
            "spBv1.0/G1/NDATA/EN1",
            &pay(1, vec![m(None, Some(7), 29.1)]),
            T0 + 20,
        );
        let got: Vec<f64> = inputs(&ev).iter().map(|i| i.1).collect();
        assert_eq!(got, vec![29.1, 29.2]);
        assert!(c.tick(T0 + 5000).is_empty(), "no gap left");
        // seq 4 without 3: after the reorder timeout, one rebirth request.
        c.message(
            "spBv1.0/G1/NDATA/EN1",
            &pay(4, vec![m(None, Some(7), 29.4)]),
            T0 + 100,
        );
        assert_eq!(
            rebirths(&c.tick(T0 + 1000)),
            0,
            "inside the reorder timeout"
        );
        let ev = c.tick(T0 + 2100);
        assert_eq!(rebirths(&ev), 1);
        match &ev[0] {
            Event::Rebirth { topic, payload, .. } => {
                assert_eq!(topic, "spBv1.0/G1/NCMD/EN1");
                assert!(is_rebirth_request(payload));
            }
            e => panic!("{e:?}"),
        }
        // Until the NBIRTH, data are not used (and no second request within the timeout).
        let ev = c.message(
            "spBv1.0/G1/NDATA/EN1",
            &pay(5, vec![m(None, Some(7), 29.5)]),
            T0 + 2200,
        );
        assert!(inputs(&ev).is_empty());
        assert_eq!(rebirths(&ev), 0);
        let ev = c.message("spBv1.0/G1/NBIRTH/EN1", &nbirth(1), T0 + 2300);
        assert_eq!(inputs(&ev).len(), 1);
        assert_eq!(c.counts.gaps, 2);
    }

    #[test]
    fn a_death_with_the_births_bdseq_marks_its_metrics_stale_and_an_old_will_does_not() {
        let mut c = Consumer::new(&refs(), 2000);
        c.message("spBv1.0/G1/NBIRTH/EN1", &nbirth(5), T0);
        c.message(
            "spBv1.0/G1/DBIRTH/EN1/AH1",
            &pay(1, vec![m(Some("TI-305A"), Some(1), 220.0)]),
            T0,
        );
        // A will of session 4 arriving late is ignored.
        let old = pay(0, vec![bd_seq_metric(4, T0)]);
        assert!(c.message("spBv1.0/G1/NDEATH/EN1", &old, T0 + 5).is_empty());
        let death = pay(0, vec![bd_seq_metric(5, T0)]);
        let ev = c.message("spBv1.0/G1/NDEATH/EN1", &death, T0 + 10);
        let got = inputs(&ev);
        assert_eq!(got.len(), 2, "{got:?}");
        assert!(got.iter().all(|(_, _, q)| q == "bad"));
        assert_eq!(c.counts.deaths, 1);
    }

    #[test]
    fn data_before_any_birth_ask_for_one() {
        let mut c = Consumer::new(&refs(), 2000);
        let ev = c.message(
            "spBv1.0/G1/NDATA/EN1",
            &pay(9, vec![m(None, Some(7), 1.0)]),
            T0,
        );
        assert_eq!(rebirths(&ev), 1);
        let ev = c.message("spBv1.0/G1/NDATA/EN1", b"\xff\xff not protobuf", T0 + 3000);
        assert_eq!(c.counts.undecodable, 1);
        assert_eq!(rebirths(&ev), 1);
    }

    #[test]
    fn opc_quality_property_maps_to_input_quality() {
        use super::super::sparkplug_b::payload::property_value::Value as P;
        use super::super::sparkplug_b::payload::{PropertySet, PropertyValue};
        let mut c = Consumer::new(&refs(), 2000);
        let mut metric = m(Some("PI-302"), Some(7), 29.0);
        metric.properties = Some(PropertySet {
            keys: vec!["Quality".into()],
            values: vec![PropertyValue {
                r#type: Some(3),
                value: Some(P::IntValue(0)),
                ..PropertyValue::default()
            }],
        });
        let ev = c.message(
            "spBv1.0/G1/NBIRTH/EN1",
            &pay(0, vec![bd_seq_metric(0, T0), metric]),
            T0,
        );
        assert_eq!(inputs(&ev)[0].2, "bad");
    }

    #[test]
    fn the_edge_node_births_every_figure_then_sends_aliases_only() {
        let id = NodeId {
            group: "baw1".into(),
            node: "eqwatch".into(),
        };
        let mut e = EdgeNode::new(id, vec!["hts1".into(), "lts1".into()]);
        let (wt, will) = e.next_session_will(T0);
        assert_eq!(wt, "spBv1.0/baw1/NDEATH/eqwatch");
        let will = Payload::decode(will.as_slice()).expect("will");
        assert_eq!(number(&will.metrics[0]), Some(0.0));
        let births = e.births(T0);
        assert_eq!(births.len(), 3);
        let nb = Payload::decode(births[0].1.as_slice()).expect("nbirth");
        assert_eq!(nb.seq, Some(0), "NBIRTH seq is 0 (Sparkplug 3.0)");
        assert!(
            nb.metrics
                .iter()
                .any(|m| m.name.as_deref() == Some("bdSeq"))
        );
        assert!(
            nb.metrics
                .iter()
                .any(|m| m.name.as_deref() == Some(REBIRTH))
        );
        let db = Payload::decode(births[2].1.as_slice()).expect("dbirth");
        assert_eq!(births[2].0, "spBv1.0/baw1/DBIRTH/eqwatch/lts1");
        assert_eq!(db.seq, Some(2));
        assert_eq!(db.metrics.len(), FIGURES.len());
        assert!(
            db.metrics
                .iter()
                .all(|m| m.name.is_some() && m.alias.is_some())
        );
        assert!(
            db.metrics.iter().all(|m| m.is_null == Some(true)),
            "no result yet"
        );
        let result = r#"{"reactor":"lts1","approach_k":12.5,"quality":"good","seq":41,"sample_ts":"2026-12-01T00:00:00Z","drift":{"ewma_k":12.0}}"#;
        let (t, bytes) = e.data("lts1", result, false, T0).expect("ddata");
        assert_eq!(t, "spBv1.0/baw1/DDATA/eqwatch/lts1");
        let dd = Payload::decode(bytes.as_slice()).expect("ddata");
        assert_eq!(dd.seq, Some(3));
        assert!(
            dd.metrics
                .iter()
                .all(|m| m.name.is_none() && m.alias.is_some())
        );
        let approach = &dd.metrics[0];
        assert_eq!(approach.alias, Some(EdgeNode::alias(1, 0)));
        assert_eq!(number(approach), Some(12.5));
        assert_eq!(approach.timestamp, Some(T0 as u64));
        let (_, late) = e.data("lts1", result, true, T0).expect("ddata");
        let late = Payload::decode(late.as_slice()).expect("ddata");
        assert!(late.metrics.iter().all(|m| m.is_historical == Some(true)));
        // The next session's will carries the next bdSeq, and its births reuse the
        // latest (non-historical) values.
        let (_, will) = e.next_session_will(T0);
        assert_eq!(
            number(&Payload::decode(will.as_slice()).expect("will").metrics[0]),
            Some(1.0)
        );
        let births = e.births(T0);
        let db = Payload::decode(births[2].1.as_slice()).expect("dbirth");
        assert_eq!(number(&db.metrics[0]), Some(12.5));
    }

    #[test]
    fn seq_wraps_from_255_to_0() {
        let id = NodeId {
            group: "g".into(),
            node: "n".into(),
        };
        let mut e = EdgeNode::new(id, vec!["r".into()]);
        e.births(T0);
        let mut last = 0;
        for _ in 0..300 {
            let (_, b) = e.data("r", "{}", false, T0).expect("ddata");
            last = Payload::decode(b.as_slice()).expect("p").seq.expect("seq");
            assert!(last <= 255);
        }
        // 1 DBIRTH + 300 DDATA after NBIRTH 0: (1 + 300) mod 256 = 45.
        assert_eq!(last, 45);
    }

    /// Hostile input: arbitrary bytes, and well-formed payloads with arbitrary seq,
    /// aliases, names and values, on every message type of a named node.
    fn hostile() -> impl proptest::strategy::Strategy<Value = (usize, Vec<u8>, i64)> {
        use proptest::prelude::*;
        let garbage = proptest::collection::vec(any::<u8>(), 0..64);
        let metric = (
            proptest::option::of("[A-Z]{0,3}-?[0-9]{0,3}|bdSeq|PI-302|TI-305A"),
            proptest::option::of(0u64..10),
            any::<f64>(),
            any::<bool>(),
        )
            .prop_map(|(name, alias, v, null)| Metric {
                name,
                alias,
                datatype: Some(datatype::DOUBLE),
                is_null: null.then_some(true),
                value: Some(metric::Value::DoubleValue(v)),
                ..Metric::default()
            });
        let structured = (
            proptest::option::of(0u64..300),
            proptest::collection::vec(metric, 0..6),
        )
            .prop_map(|(seq, metrics)| {
                Payload {
                    timestamp: Some(T0 as u64),
                    seq,
                    metrics,
                    ..Payload::default()
                }
                .encode_to_vec()
            });
        (0usize..8, prop_oneof![garbage, structured], 0i64..10_000)
    }

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(128))]
        /// The consumer never panics, every input it makes is a JSON reading, and a
        /// rebirth request is never sent twice within the reorder timeout.
        #[test]
        fn hostile_sparkplug_messages_never_panic(
            messages in proptest::collection::vec(hostile(), 1..60)
        ) {
            let kinds = ["NBIRTH", "NDEATH", "NDATA", "NCMD"];
            let dkinds = ["DBIRTH", "DDEATH", "DDATA", "DCMD"];
            let mut c = Consumer::new(&refs(), 2000);
            let mut last_ask: Option<i64> = None;
            let mut now = T0;
            for (k, bytes, dt) in messages {
                now += dt;
                let topic = if k < 4 {
                    format!("spBv1.0/G1/{}/EN1", kinds[k])
                } else {
                    format!("spBv1.0/G1/{}/EN1/AH1", dkinds[k - 4])
                };
                let mut ev = c.message(&topic, &bytes, now);
                ev.extend(c.tick(now));
                for e in &ev {
                    match e {
                        Event::Input { payload, .. } => {
                            let v: Value = serde_json::from_str(payload).expect("JSON");
                            proptest::prop_assert!(v["value"].as_f64().is_some_and(f64::is_finite));
                        }
                        Event::Rebirth { .. } => {
                            proptest::prop_assert!(last_ask.is_none_or(|a| now - a >= 2000));
                            last_ask = Some(now);
                        }
                    }
                }
            }
        }
    }
}
