//! One reactor's lane: its monitor and watch, the metrics it keeps, the records it
//! makes (results, events, retained states) and, for replay, its trace. Lanes are
//! independent of each other (replay runs them on several threads); what is
//! plant-wide is in [`super::plant`].

use std::sync::Arc;
use std::sync::atomic::Ordering::Relaxed;

use tracing::{debug, info, warn};

use super::Append;
use super::metrics::Metrics;
use super::throttle::Throttle;
use super::trace::{Trace, TraceBaseline, TraceEvent, TracePoint, compact};
use crate::config::Settings;
use crate::monitor::alarm::EventKind;
use crate::monitor::watch::{Class, DriftFigures, Forecast, ReactorWatch, WatchEvent};
use crate::monitor::{Evaluation, Input, Outcome, Quality, ReactorMonitor};
use crate::units::DAY_MS;
use crate::wire;
use crate::wire::watch as wp;

/// The topics a lane publishes on.
pub(super) struct Topics {
    result: String,
    /// The flat metrics message after each result, when `metrics_topic = true`.
    metrics: String,
    alert: String,
    alarm: String,
    alarms: String,
    pub(super) outcome: String,
}

/// Records made by a [`Lane`], with the points at which the plant-wide self-monitoring
/// must look at the events published so far (see [`super::Plant::drain`]).
#[derive(Debug, Default)]
pub struct Sink {
    pub records: Vec<Append>,
    pub(super) marks: Vec<Mark>,
    /// The latest figures of reactors in a `[trains]` entry (the plant-wide part
    /// publishes the train summaries).
    pub(super) members: Vec<crate::wire::train::Member>,
}

/// A place in a sink's records where events were published.
#[derive(Debug)]
pub(super) struct Mark {
    /// `records.len()` when the events were published.
    pub(super) at: usize,
    pub(super) events: Vec<WatchEvent>,
    pub(super) now_ms: i64,
}

impl Sink {
    pub fn is_empty(&self) -> bool {
        self.records.is_empty() && self.marks.is_empty() && self.members.is_empty()
    }
    /// Whether the plant-wide part must see these records: alert or alarm events (the
    /// flood count) or a train member's figures (the train summary).
    pub fn has_events(&self) -> bool {
        !self.marks.is_empty() || !self.members.is_empty()
    }
}

/// One reactor's processing: monitor, watch, encoding. Independent of the other
/// reactors (replay runs lanes on several threads); what is plant-wide is in [`super::Plant`].
pub struct Lane {
    r: usize,
    pub(super) settings: Arc<Settings>,
    pub(super) metrics: Arc<Metrics>,
    monitor: ReactorMonitor,
    pub(super) watch: ReactorWatch,
    pub(super) topics: Topics,
    /// Kept when enabled (replay plots).
    pub trace: Option<Trace>,
    /// Refused-input warnings, one per reason a minute.
    throttle: Throttle,
}

impl Lane {
    /// The lane of reactor `r` of the settings; the alarm configurations were validated
    /// with the settings, so an error here names the reactor and what was refused.
    pub(super) fn new(
        r: usize,
        settings: Arc<Settings>,
        metrics: Arc<Metrics>,
    ) -> Result<Self, String> {
        let rs = &settings.reactors[r];
        let (p, id) = (&settings.topic_prefix, &rs.spec.id);
        let topics = Topics {
            result: format!("{p}/{id}/result"),
            metrics: format!("{p}/{id}/metrics"),
            alert: format!("{p}/{id}/alert"),
            alarm: format!("{p}/{id}/alarm"),
            alarms: format!("{p}/{id}/alarms"),
            outcome: format!("{p}/{id}/command/outcome"),
        };
        let monitor = ReactorMonitor::new(&rs.spec);
        let watch = ReactorWatch::new(&rs.spec.watch).map_err(|e| format!("reactors.{id}: {e}"))?;
        Ok(Self {
            r,
            settings,
            metrics,
            monitor,
            watch,
            topics,
            trace: None,
            throttle: Throttle::default(),
        })
    }

    /// Index of the reactor in the configuration.
    pub fn reactor(&self) -> usize {
        self.r
    }

    /// The reactor's id.
    pub fn id(&self) -> &str {
        &self.settings.reactors[self.r].spec.id
    }

    /// One decoded input.
    pub fn accept(&mut self, input: Input, arrival_ms: i64, now_ms: i64, sink: &mut Sink) {
        let settings = Arc::clone(&self.settings);
        let rs = &settings.reactors[self.r];
        let metrics = Arc::clone(&self.metrics);
        let rm = &metrics.reactors[self.r];
        // A reading from a misset clock touches nothing: not the on/off-line state, not
        // the monitor's ordering (the monitor checks again, for callers without a lane).
        if let Some(ahead_ms) = rs.spec.clock.outside(input.ts_ms(), arrival_ms) {
            self.off_clock(ahead_ms, now_ms);
            return;
        }
        if let Input::Pressure(p) = &input {
            let ev = self.watch.pressure(&rs.spec.watch, p.value, now_ms);
            if let Some(t) = self.trace.as_mut() {
                let open = matches!(t.offline.last(), Some((_, None)));
                match (self.watch.offline(), open) {
                    (true, false) => t.offline.push((now_ms, None)),
                    (false, true) => {
                        if let Some(last) = t.offline.last_mut() {
                            last.1 = Some(now_ms);
                        }
                    }
                    _ => {}
                }
            }
            if !ev.is_empty() {
                info!(reactor = %rs.spec.id, offline = self.watch.offline(), "process unit on/off line");
                self.publish_events(ev, now_ms, sink);
            }
        }
        match self
            .monitor
            .accept(&rs.spec, &settings.species, input, arrival_ms)
        {
            Outcome::Stored => {}
            Outcome::Duplicate => {
                rm.duplicates.fetch_add(1, Relaxed);
                debug!(reactor = %rs.spec.id, "duplicate analysis ignored");
            }
            Outcome::OutOfOrder { last_ts_ms } => {
                rm.out_of_order.fetch_add(1, Relaxed);
                if let Some(suppressed) = self.throttle.allow((self.r, "out_of_order"), now_ms) {
                    warn!(reactor = %rs.spec.id, last = %crate::timefmt::format_rfc3339(last_ts_ms), suppressed, "analysis older than the last one refused");
                }
            }
            Outcome::TooOld => {
                rm.too_old.fetch_add(1, Relaxed);
            }
            Outcome::OffClock { ahead_ms } => self.off_clock(ahead_ms, now_ms),
            Outcome::Evaluated(e) => self.evaluated(&e, arrival_ms, now_ms, sink),
        }
    }

    /// Counts and logs a reading refused for its timestamp.
    fn off_clock(&mut self, ahead_ms: i64, now_ms: i64) {
        self.metrics.reactors[self.r]
            .off_clock
            .fetch_add(1, Relaxed);
        let (way, by) = if ahead_ms >= 0 {
            ("ahead of", ahead_ms)
        } else {
            ("behind", ahead_ms.saturating_neg())
        };
        let Some(suppressed) = self.throttle.allow((self.r, "off_clock"), now_ms) else {
            return;
        };
        warn!(reactor = %self.id(), by_s = by / 1000, suppressed, "reading refused: stamped {way} the daemon's clock by more than the configured window (check the instrument's or gateway's clock)");
    }

    /// One evaluation: counted and logged, watched (drift, alerts, alarms), traced for
    /// plots when enabled, encoded as the retained result (and, when configured, the
    /// metrics message right after it), then its events.
    fn evaluated(&mut self, e: &Evaluation, arrival_ms: i64, now_ms: i64, sink: &mut Sink) {
        let settings = Arc::clone(&self.settings);
        let rs = &settings.reactors[self.r];
        let approach = self.count(e);
        let (fig, events) = self.watch.observe(&rs.spec.watch, e, now_ms);
        self.count_drift(e, &fig);
        if self.trace.is_some() {
            self.record_trace(e, approach, &fig);
        }
        let (payload, point) =
            wire::result::encode_result_and_point(rs, &settings.species, e, arrival_ms, Some(&fig));
        sink.records.push(Append {
            topic: self.topics.result.clone(),
            retain: true,
            payload,
            point: Some(point),
        });
        // Read from the settings at each result, so a reload switches it at once.
        if settings.metrics_topic {
            sink.records.push(Append {
                topic: self.topics.metrics.clone(),
                retain: false,
                point: None,
                payload: wire::metrics::encode_metrics(&settings.site, rs, e, Some(&fig)),
            });
        }
        if settings.trains.iter().any(|t| t.members.contains(&self.r)) {
            sink.members
                .push(crate::wire::train::Member::of(self.r, rs, e, &fig));
        }
        if let Some(t) = self.trace.as_mut() {
            t.last_drift = Some(fig);
        }
        self.publish_events(events, now_ms, sink);
    }

    /// Counts the evaluation by quality, keeps the approach gauge, logs what was not
    /// good; returns the headline approach (none for a bad evaluation).
    fn count(&self, e: &Evaluation) -> Option<f64> {
        let rm = &self.metrics.reactors[self.r];
        let q = match e.quality {
            Quality::Good => 0,
            Quality::Uncertain => 1,
            Quality::Bad => 2,
        };
        rm.evaluations[q].fetch_add(1, Relaxed);
        let approach = e
            .reactions
            .first()
            .filter(|_| e.quality != Quality::Bad)
            .and_then(|a| a.approach_k);
        rm.approach_k
            .store(approach.unwrap_or(f64::NAN).to_bits(), Relaxed);
        if e.quality != Quality::Good {
            let codes: Vec<&str> = e
                .reasons
                .iter()
                .filter(|x| x.severity != Quality::Good)
                .map(|x| x.code.as_str())
                .collect();
            warn!(reactor = %self.id(), quality = %e.quality.as_str(), reasons = %codes.join(","), "evaluation not good");
        } else {
            debug!(reactor = %self.id(), approach_k = approach.unwrap_or(f64::NAN), "evaluated");
        }
        approach
    }

    /// The drift gauges: exclusions, trend and days to the end of run.
    fn count_drift(&self, e: &Evaluation, fig: &DriftFigures) {
        let rm = &self.metrics.reactors[self.r];
        if fig.excluded.is_some() {
            rm.drift_excluded.fetch_add(1, Relaxed);
        }
        rm.trend_k_per_day.store(
            fig.trend.map_or(f64::NAN, |t| t.slope_k_per_day).to_bits(),
            Relaxed,
        );
        let days = match fig.forecast {
            Forecast::At { at_ms, .. } => (at_ms - e.sample_ts_ms) as f64 / DAY_MS as f64,
            Forecast::Reached => 0.0,
            _ => f64::NAN,
        };
        rm.end_of_run_days.store(days.to_bits(), Relaxed);
    }

    /// Replay's trace: the point, new daily aggregates and the baseline span.
    fn record_trace(&mut self, e: &Evaluation, approach: Option<f64>, fig: &DriftFigures) {
        let settings = Arc::clone(&self.settings);
        let model = &settings.reactors[self.r].spec.model;
        let (run, aggs) = self.watch.aggregates();
        let Some(t) = self.trace.as_mut() else {
            return;
        };
        let water = settings
            .species
            .index_of("H2O")
            .and_then(|w| model.species().iter().position(|&x| x == w));
        let at = |v: &[f64]| compact(water.and_then(|i| v.get(i).copied()));
        let headline = e.reactions.first().filter(|_| e.quality != Quality::Bad);
        t.points.push(TracePoint {
            t_ms: e.sample_ts_ms,
            good: e.quality == Quality::Good,
            bad: e.quality == Quality::Bad,
            approach_k: compact(approach),
            uncertainty_k: compact(headline.and_then(|a| a.approach_uncertainty_k)),
            key_measured: compact(e.key_measured),
            key_equilibrium: compact(e.key_equilibrium),
            water_measured: at(&e.mole_fractions),
            water_equilibrium: at(&e.equilibrium_mole_fractions),
        });
        if t.aggregates_seen.0 != run || aggs.len() < t.aggregates_seen.1 {
            t.aggregates_seen = (run, 0);
        }
        if let Some(start) = run {
            for &(day, k) in &aggs[t.aggregates_seen.1..] {
                t.aggregates
                    .push((start + (day * DAY_MS as f64).round() as i64, k));
            }
        }
        t.aggregates_seen.1 = aggs.len();
        if let Some(b) = fig.baseline {
            match t.baselines.last_mut() {
                Some(last) if last.from_ms == b.since_ms => last.to_ms = e.sample_ts_ms,
                _ => t.baselines.push(TraceBaseline {
                    from_ms: b.since_ms,
                    to_ms: e.sample_ts_ms,
                    approach_k: b.approach_k,
                    sigma_k: b.sigma_k,
                }),
            }
        }
    }

    /// Publishes events, counts them, republishes the reactor's retained states, and
    /// marks the place for the plant-wide flood count.
    pub(super) fn publish_events(&mut self, events: Vec<WatchEvent>, now_ms: i64, sink: &mut Sink) {
        if events.is_empty() {
            return;
        }
        let rs_id = &self.settings.reactors[self.r].spec.id;
        let rm = &self.metrics.reactors[self.r];
        for e in &events {
            let x = &self.watch.watched[e.index];
            let id = &x.alarm.config().id;
            let raised = matches!(e.event.kind, EventKind::Raised | EventKind::Realarmed);
            match (e.class, raised) {
                (Class::Alarm, true) => {
                    rm.alarm_activations.fetch_add(1, Relaxed);
                    warn!(reactor = %rs_id, alarm = %id, value = x.value.unwrap_or(f64::NAN), "operator alarm raised");
                }
                (Class::Alert, true) => {
                    rm.alerts_raised.fetch_add(1, Relaxed);
                    if id.starts_with("chattering:") {
                        self.metrics.chattering.fetch_add(1, Relaxed);
                    }
                    if id.starts_with("stale:") {
                        self.metrics.stale.fetch_add(1, Relaxed);
                    }
                    info!(reactor = %rs_id, alert = %id, value = x.value.unwrap_or(f64::NAN), "alert raised");
                }
                _ => {
                    info!(reactor = %rs_id, class = %e.class.as_str(), alarm = %id, event = %wp::event_name(&e.event.kind), "alert or alarm event")
                }
            }
            let topic = match e.class {
                Class::Alert => self.topics.alert.clone(),
                Class::Alarm => self.topics.alarm.clone(),
            };
            sink.records.push(Append {
                topic,
                retain: false,
                point: None,
                payload: wp::encode_event(rs_id, &self.watch, e),
            });
            if let Some(tr) = self.trace.as_mut() {
                tr.events.push(TraceEvent {
                    t_ms: e.event.at_ms,
                    class: e.class,
                    alarm: id.clone(),
                    kind: e.event.kind.clone(),
                });
            }
        }
        sink.records.push(self.states(now_ms));
        sink.marks.push(Mark {
            at: sink.records.len(),
            events,
            now_ms,
        });
    }

    pub(super) fn states(&self, now_ms: i64) -> Append {
        Append {
            topic: self.topics.alarms.clone(),
            retain: true,
            point: None,
            payload: wp::encode_states(
                &self.settings.reactors[self.r].spec.id,
                &self.watch,
                now_ms,
            ),
        }
    }

    /// Advances the watch's timers (shelf expiry, data quality, chattering, stale).
    pub fn tick(&mut self, now_ms: i64, sink: &mut Sink) {
        let ev = self.watch.tick(now_ms);
        self.publish_events(ev, now_ms, sink);
    }
}
