//! Counters and gauges of the daemon, shared between tasks through atomics, rendered
//! as Prometheus text exposition (version 0.0.4).

use std::fmt::Write;
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering::Relaxed};

use crate::wire::input::DecodeError;
use crate::wire::watch::Verdict;

/// Per-reactor figures.
#[derive(Debug, Default)]
pub struct ReactorMetrics {
    pub id: String,
    /// Evaluations by quality: good, uncertain, bad.
    pub evaluations: [AtomicU64; 3],
    /// Latest approach of the first reaction, f64 bits (NaN when none).
    pub approach_k: AtomicU64,
    pub duplicates: AtomicU64,
    pub out_of_order: AtomicU64,
    pub too_old: AtomicU64,
    /// Readings stamped outside the clock window.
    pub off_clock: AtomicU64,
    /// Evaluations left out of the drift statistics (bad, transient, off line).
    pub drift_excluded: AtomicU64,
    /// Trend of the approach, K/day, f64 bits (NaN when none).
    pub trend_k_per_day: AtomicU64,
    /// Days to the end-of-run forecast, f64 bits (NaN when none).
    pub end_of_run_days: AtomicU64,
    pub alarm_activations: AtomicU64,
    pub alerts_raised: AtomicU64,
}

#[derive(Debug, Default)]
pub struct Metrics {
    pub messages_in: AtomicU64,
    pub unrouted: AtomicU64,
    /// Input messages over `broker.max_packet_bytes`, refused by the input link.
    pub oversized: AtomicU64,
    pub decode_failures: [AtomicU64; DecodeError::REASONS.len()],
    pub published: AtomicU64,
    pub publish_failures: AtomicU64,
    /// Losses of the result connection (which carries the status).
    pub reconnects: AtomicU64,
    pub connected: AtomicBool,
    /// The input connection (subscriptions): losses and state.
    pub input_reconnects: AtomicU64,
    pub input_connected: AtomicBool,
    /// Every subscription asked for on the current input connection is acknowledged
    /// (SUBACK): inputs published from now on reach the daemon.
    pub input_subscribed: AtomicBool,
    pub ready: AtomicBool,
    pub journal_last_seq: AtomicU64,
    pub journal_published_seq: AtomicU64,
    pub journal_bytes: AtomicU64,
    pub journal_dropped: AtomicU64,
    pub journal_dropped_unpublished: AtomicU64,
    pub journal_errors: AtomicU64,
    /// Results held in memory while the journal disk does not take them, and those
    /// dropped from memory over `journal.memory_max_bytes` (never written).
    pub journal_held: AtomicU64,
    pub journal_held_dropped: AtomicU64,
    pub journal_held_dropped_unpublished: AtomicU64,
    /// Operator alarm activations in the last 10 minutes (all reactors).
    pub alarms_last_10min: AtomicU64,
    pub floods: AtomicU64,
    /// Configuration reloads (SIGHUP) applied, and refused (bad file or a change that
    /// needs a restart).
    pub reloads: AtomicU64,
    pub reloads_refused: AtomicU64,
    /// The evaluator's once-a-second ticks (the watchdog pings only while they come).
    pub evaluator_ticks: AtomicU64,
    /// Sparkplug B: messages from the edge nodes read, undecodable ones, sequence
    /// gaps, rebirth requests, node deaths; results published as an edge node, and
    /// those dropped while its connection was down.
    pub spb_messages: AtomicU64,
    pub spb_undecodable: AtomicU64,
    pub spb_gaps: AtomicU64,
    pub spb_rebirths_requested: AtomicU64,
    pub spb_deaths: AtomicU64,
    pub spb_published: AtomicU64,
    pub spb_held_dropped: AtomicU64,
    pub chattering: AtomicU64,
    pub stale: AtomicU64,
    /// Commands by outcome: accepted, refused, not-allowed, invalid.
    pub commands: [AtomicU64; Verdict::ALL.len()],
    pub reactors: Vec<ReactorMetrics>,
}

impl Metrics {
    pub fn new(reactor_ids: &[String]) -> Self {
        Self {
            reactors: reactor_ids
                .iter()
                .map(|id| ReactorMetrics {
                    id: id.clone(),
                    approach_k: AtomicU64::new(f64::NAN.to_bits()),
                    trend_k_per_day: AtomicU64::new(f64::NAN.to_bits()),
                    end_of_run_days: AtomicU64::new(f64::NAN.to_bits()),
                    ..Default::default()
                })
                .collect(),
            ..Default::default()
        }
    }

    pub fn backlog(&self) -> u64 {
        self.journal_last_seq
            .load(Relaxed)
            .saturating_sub(self.journal_published_seq.load(Relaxed))
    }

    /// Prometheus text exposition.
    pub fn render(&self) -> String {
        let mut s = String::with_capacity(4096);
        let mut counter = |name: &str, help: &str, v: u64| {
            let _ = writeln!(
                s,
                "# HELP eqwatch_{name} {help}\n# TYPE eqwatch_{name} counter\neqwatch_{name} {v}"
            );
        };
        counter(
            "messages_received_total",
            "MQTT messages received on input topics.",
            self.messages_in.load(Relaxed),
        );
        counter(
            "messages_unrouted_total",
            "Messages on topics no input uses.",
            self.unrouted.load(Relaxed),
        );
        counter(
            "messages_oversized_total",
            "Input messages over broker.max_packet_bytes, refused (the link stays up).",
            self.oversized.load(Relaxed),
        );
        counter(
            "results_published_total",
            "Journal records acknowledged by the broker.",
            self.published.load(Relaxed),
        );
        counter(
            "publish_failures_total",
            "Publishes that could not be handed to the MQTT client.",
            self.publish_failures.load(Relaxed),
        );
        counter(
            "reconnects_total",
            "Losses of the result connection to the broker.",
            self.reconnects.load(Relaxed),
        );
        counter(
            "input_reconnects_total",
            "Losses of the input connection to the broker.",
            self.input_reconnects.load(Relaxed),
        );
        counter(
            "journal_dropped_total",
            "Journal records deleted by the size cap.",
            self.journal_dropped.load(Relaxed),
        );
        counter(
            "journal_dropped_unpublished_total",
            "Journal records deleted by the size cap before the broker had them.",
            self.journal_dropped_unpublished.load(Relaxed),
        );
        counter(
            "journal_errors_total",
            "Journal write or read errors.",
            self.journal_errors.load(Relaxed),
        );
        counter(
            "journal_held_dropped_total",
            "Results dropped from memory over journal.memory_max_bytes while the journal could not be written (never journaled).",
            self.journal_held_dropped.load(Relaxed),
        );
        counter(
            "journal_held_dropped_unpublished_total",
            "Of those, results the broker had not acknowledged.",
            self.journal_held_dropped_unpublished.load(Relaxed),
        );
        for (name, help, v) in [
            (
                "sparkplug_messages_total",
                "Sparkplug B messages read from the edge nodes the inputs name.",
                &self.spb_messages,
            ),
            (
                "sparkplug_undecodable_total",
                "Sparkplug B payloads that were not valid protobuf.",
                &self.spb_undecodable,
            ),
            (
                "sparkplug_sequence_gaps_total",
                "Sparkplug B sequence gaps (a message missing or out of order).",
                &self.spb_gaps,
            ),
            (
                "sparkplug_rebirth_requests_total",
                "Rebirth requests sent to edge nodes (gap not filled in time, data before a birth, unreadable payload).",
                &self.spb_rebirths_requested,
            ),
            (
                "sparkplug_node_deaths_total",
                "NDEATHs matching their node's birth (its metrics marked stale).",
                &self.spb_deaths,
            ),
            (
                "sparkplug_results_published_total",
                "Results published as Sparkplug B DDATA.",
                &self.spb_published,
            ),
            (
                "sparkplug_results_dropped_total",
                "Results not published as Sparkplug B: the edge connection was down longer than its buffer.",
                &self.spb_held_dropped,
            ),
        ] {
            counter(name, help, v.load(Relaxed));
        }
        counter(
            "config_reloads_total",
            "Configuration reloads (SIGHUP) applied.",
            self.reloads.load(Relaxed),
        );
        counter(
            "config_reloads_refused_total",
            "Configuration reloads refused (errors in the file, or a change that needs a restart); the running configuration was kept.",
            self.reloads_refused.load(Relaxed),
        );
        counter(
            "alarm_floods_total",
            "Alarm floods: more than 10 operator alarms in 10 minutes (EEMUA 191 figure).",
            self.floods.load(Relaxed),
        );
        counter(
            "alarm_chattering_total",
            "Chattering alerts: an alarm activated 3 or more times in a minute.",
            self.chattering.load(Relaxed),
        );
        counter(
            "alarm_stale_total",
            "Stale alerts: an alarm active for more than 24 h.",
            self.stale.load(Relaxed),
        );
        let _ = writeln!(
            s,
            "# HELP eqwatch_decode_failures_total Input messages that could not be decoded, by reason.\n# TYPE eqwatch_decode_failures_total counter"
        );
        for (i, r) in DecodeError::REASONS.iter().enumerate() {
            let _ = writeln!(
                s,
                "eqwatch_decode_failures_total{{reason=\"{r}\"}} {}",
                self.decode_failures[i].load(Relaxed)
            );
        }
        let _ = writeln!(
            s,
            "# HELP eqwatch_evaluations_total Evaluated analyses by reactor and quality.\n# TYPE eqwatch_evaluations_total counter"
        );
        for r in &self.reactors {
            for (i, q) in ["good", "uncertain", "bad"].iter().enumerate() {
                let _ = writeln!(
                    s,
                    "eqwatch_evaluations_total{{reactor=\"{}\",quality=\"{q}\"}} {}",
                    r.id,
                    r.evaluations[i].load(Relaxed)
                );
            }
        }
        let _ = writeln!(
            s,
            "# HELP eqwatch_inputs_refused_total Inputs refused by reactor and reason.\n# TYPE eqwatch_inputs_refused_total counter"
        );
        for r in &self.reactors {
            for (reason, v) in [
                ("duplicate", &r.duplicates),
                ("out_of_order", &r.out_of_order),
                ("too_old", &r.too_old),
                ("off_clock", &r.off_clock),
            ] {
                let _ = writeln!(
                    s,
                    "eqwatch_inputs_refused_total{{reactor=\"{}\",reason=\"{reason}\"}} {}",
                    r.id,
                    v.load(Relaxed)
                );
            }
        }
        let _ = writeln!(
            s,
            "# HELP eqwatch_commands_total Operator commands by outcome.\n# TYPE eqwatch_commands_total counter"
        );
        for v in Verdict::ALL {
            let _ = writeln!(
                s,
                "eqwatch_commands_total{{outcome=\"{}\"}} {}",
                v.as_str(),
                self.commands[v.index()].load(Relaxed)
            );
        }
        for (name, help, kind, get) in [
            (
                "alarm_activations_total",
                "Operator alarm activations (raised or re-alarmed) by reactor.",
                "counter",
                (|r: &ReactorMetrics| r.alarm_activations.load(Relaxed).to_string())
                    as fn(&ReactorMetrics) -> String,
            ),
            (
                "alerts_raised_total",
                "Engineering alerts raised by reactor.",
                "counter",
                |r: &ReactorMetrics| r.alerts_raised.load(Relaxed).to_string(),
            ),
            (
                "drift_excluded_total",
                "Evaluations left out of the drift statistics (bad, transient, unit off line).",
                "counter",
                |r: &ReactorMetrics| r.drift_excluded.load(Relaxed).to_string(),
            ),
            (
                "trend_kelvin_per_day",
                "Trend of the approach on steady-state aggregates.",
                "gauge",
                |r: &ReactorMetrics| float(r.trend_k_per_day.load(Relaxed)),
            ),
            (
                "end_of_run_days",
                "Days until the approach reaches its end-of-run limit at the current trend.",
                "gauge",
                |r: &ReactorMetrics| float(r.end_of_run_days.load(Relaxed)),
            ),
        ] {
            let _ = writeln!(
                s,
                "# HELP eqwatch_{name} {help}\n# TYPE eqwatch_{name} {kind}"
            );
            for r in &self.reactors {
                let _ = writeln!(s, "eqwatch_{name}{{reactor=\"{}\"}} {}", r.id, get(r));
            }
        }
        let _ = writeln!(
            s,
            "# HELP eqwatch_approach_kelvin Latest temperature approach of the reactor's first reaction.\n# TYPE eqwatch_approach_kelvin gauge"
        );
        for r in &self.reactors {
            let v = f64::from_bits(r.approach_k.load(Relaxed));
            let text = if v.is_finite() {
                v.to_string()
            } else {
                "NaN".into()
            };
            let _ = writeln!(s, "eqwatch_approach_kelvin{{reactor=\"{}\"}} {text}", r.id);
        }
        let mut gauge = |name: &str, help: &str, v: u64| {
            let _ = writeln!(
                s,
                "# HELP eqwatch_{name} {help}\n# TYPE eqwatch_{name} gauge\neqwatch_{name} {v}"
            );
        };
        gauge(
            "alarms_last_10_minutes",
            "Operator alarm activations in the last 10 minutes, all reactors (about 1 is acceptable, above 10 a flood).",
            self.alarms_last_10min.load(Relaxed),
        );
        gauge(
            "broker_connected",
            "1 while both connections to the broker (results and input) are up.",
            u64::from(self.connected.load(Relaxed) && self.input_connected.load(Relaxed)),
        );
        gauge(
            "journal_backlog_records",
            "Journal records not yet acknowledged by the broker.",
            self.backlog(),
        );
        gauge(
            "journal_last_sequence",
            "Sequence number of the newest journal record.",
            self.journal_last_seq.load(Relaxed),
        );
        gauge(
            "journal_held_records",
            "Results held in memory because the journal disk is full or cannot be written (readiness is false while above 0).",
            self.journal_held.load(Relaxed),
        );
        gauge(
            "journal_bytes",
            "Bytes held in journal files.",
            self.journal_bytes.load(Relaxed),
        );
        s
    }
}

fn float(bits: u64) -> String {
    let v = f64::from_bits(bits);
    if v.is_finite() {
        v.to_string()
    } else {
        "NaN".into()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn renders_every_family_once() {
        let m = Metrics::new(&["lts1".to_string()]);
        m.messages_in.fetch_add(3, Relaxed);
        m.reactors[0].approach_k.store(12.5f64.to_bits(), Relaxed);
        let text = m.render();
        assert!(text.contains("eqwatch_messages_received_total 3"));
        assert!(text.contains("eqwatch_approach_kelvin{reactor=\"lts1\"} 12.5"));
        assert!(text.contains("eqwatch_decode_failures_total{reason=\"bad_unit\"} 0"));
        assert_eq!(text.matches("# TYPE eqwatch_evaluations_total").count(), 1);
    }
}
