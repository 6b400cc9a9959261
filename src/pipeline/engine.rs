//! The engine: every lane and the plant-wide part behind one front door. The live
//! daemon feeds it MQTT messages ([`Engine::message`]); `eqwatch replay` feeds it CSV
//! rows already decoded ([`Engine::accept`]) or takes its lanes apart to run them on
//! several threads ([`Engine::into_parts`]); both take the same path after decoding.

use std::collections::HashMap;
use std::sync::Arc;
use std::sync::atomic::Ordering::Relaxed;

use tracing::warn;

use super::lane::{Lane, Sink};
use super::metrics::Metrics;
use super::plant::Plant;
use super::route::{Route, decode, routes};
use super::throttle::Throttle;
use super::trace::Trace;
use super::{Append, RawInput};
use crate::config::Settings;
use crate::monitor::Input;

/// See the module docs.
pub struct Engine {
    pub(super) settings: Arc<Settings>,
    pub(super) routes: HashMap<String, Vec<Route>>,
    pub(super) lanes: Vec<Lane>,
    plant: Plant,
    pub(super) metrics: Arc<Metrics>,
    sink: Sink,
    /// Rejected-input warnings, one per reactor and reason a minute.
    throttle: Throttle,
}

impl Engine {
    /// Builds the engine; the alarm configurations were validated with the settings.
    pub fn new(settings: Arc<Settings>, metrics: Arc<Metrics>) -> Result<Self, String> {
        let lanes = (0..settings.reactors.len())
            .map(|r| Lane::new(r, Arc::clone(&settings), Arc::clone(&metrics)))
            .collect::<Result<Vec<_>, _>>()?;
        Ok(Self {
            routes: routes(&settings),
            lanes,
            plant: Plant::new(&settings, Arc::clone(&metrics)),
            metrics,
            sink: Sink::default(),
            throttle: Throttle::default(),
            settings,
        })
    }

    /// Keep a trace per reactor for plots.
    pub fn enable_trace(&mut self) {
        for lane in &mut self.lanes {
            lane.trace.get_or_insert_with(Trace::default);
        }
    }

    /// The traces (empty ones where tracing was off).
    pub fn take_traces(&mut self) -> Vec<Trace> {
        self.lanes
            .iter_mut()
            .map(|u| u.trace.take().unwrap_or_default())
            .collect()
    }

    /// The lanes and the plant part, to run the lanes on several threads (replay).
    pub fn into_parts(self) -> (Vec<Lane>, Plant) {
        (self.lanes, self.plant)
    }

    /// Per reactor: id, its drift settings as text (to notice a change), the run's state.
    pub fn drift_snapshots(&self) -> Vec<(String, String, crate::monitor::watch::DriftSnapshot)> {
        self.lanes
            .iter()
            .map(|lane| {
                let rs = &self.settings.reactors[lane.reactor()];
                (
                    rs.spec.id.clone(),
                    format!("{:?}", rs.spec.watch.drift),
                    lane.watch.drift_snapshot(),
                )
            })
            .collect()
    }

    /// Per reactor: id and its alerts' and alarms' saved states.
    #[allow(clippy::type_complexity)]
    pub fn alarm_snapshots(
        &self,
    ) -> Vec<(
        String,
        Vec<(String, String, crate::monitor::alarm::AlarmSnapshot)>,
    )> {
        self.lanes
            .iter()
            .map(|lane| {
                (
                    self.settings.reactors[lane.reactor()].spec.id.clone(),
                    lane.watch.alarm_snapshots(),
                )
            })
            .collect()
    }

    /// Restores one alert or alarm of reactor `id` (same configuration only).
    pub fn restore_alarm(
        &mut self,
        id: &str,
        alarm: &str,
        config: &str,
        snap: &crate::monitor::alarm::AlarmSnapshot,
    ) -> bool {
        match self.settings.reactors.iter().position(|r| r.spec.id == id) {
            Some(r) => self.lanes[r].watch.restore_alarm(alarm, config, snap),
            None => false,
        }
    }

    /// Restores reactor `id`'s run; false when refused (damaged numbers, unknown id).
    pub fn restore_drift(&mut self, id: &str, snap: &crate::monitor::watch::DriftSnapshot) -> bool {
        let settings = Arc::clone(&self.settings);
        match settings.reactors.iter().position(|r| r.spec.id == id) {
            Some(r) => self.lanes[r]
                .watch
                .restore_drift(&settings.reactors[r].spec.watch.drift, snap),
            None => false,
        }
    }

    /// Topics to subscribe to (inputs and commands), sorted.
    pub fn subscriptions(&self) -> Vec<String> {
        let mut t: Vec<String> = self
            .routes
            .keys()
            .filter(|k| !k.starts_with(crate::config::SpbRef::PREFIX))
            .cloned()
            .collect();
        t.sort();
        t
    }

    /// The inputs on Sparkplug metrics (`spb:` references), sorted; they arrive through
    /// the Sparkplug link, not a subscription.
    pub fn sparkplug_inputs(&self) -> Vec<crate::config::SpbRef> {
        let mut v: Vec<crate::config::SpbRef> = self
            .routes
            .keys()
            .filter_map(|k| crate::config::SpbRef::parse(k)?.ok())
            .collect();
        v.sort();
        v
    }

    /// The retained alarm states of every reactor that has alerts or alarms (published
    /// at start-up: the daemon starts with every alarm normal and in service).
    pub fn states(&self, now_ms: i64, out: &mut Vec<Append>) {
        for lane in &self.lanes {
            if !lane.watch.watched.is_empty() {
                out.push(lane.states(now_ms));
            }
        }
    }

    /// One MQTT message: an input or a command.
    pub fn message(&mut self, raw: &RawInput, now_ms: i64, out: &mut Vec<Append>) {
        let Some(rts) = self.routes.get(&raw.topic) else {
            self.metrics.unrouted.fetch_add(1, Relaxed);
            return;
        };
        let rts = rts.clone();
        for route in rts {
            if let Route::Command(r) = route {
                self.lanes[r].command(&raw.payload, now_ms, &mut self.sink);
                self.plant.drain(&mut self.sink, out);
                continue;
            }
            let (r, decoded) = decode(&self.settings, route, raw);
            match decoded {
                Ok(input) => self.accept(r, input, raw.arrival_ms, now_ms, out),
                Err(e) => {
                    self.metrics.decode_failures[e.reason_index()].fetch_add(1, Relaxed);
                    if let Some(suppressed) = self.throttle.allow((r, e.reason()), now_ms) {
                        warn!(reactor = %self.settings.reactors[r].spec.id, topic = %raw.topic, reason = %e.reason(), error = %e, suppressed, "input rejected (suppressed: like rejections not logged in the minute before)");
                    }
                }
            }
        }
    }

    /// One decoded input for reactor `r` (the path shared with replay).
    pub fn accept(
        &mut self,
        r: usize,
        input: Input,
        arrival_ms: i64,
        now_ms: i64,
        out: &mut Vec<Append>,
    ) {
        self.lanes[r].accept(input, arrival_ms, now_ms, &mut self.sink);
        self.plant.drain(&mut self.sink, out);
    }

    /// Advances the watches' timers (shelf expiry, data quality, chattering, stale, flood).
    pub fn tick(&mut self, now_ms: i64, out: &mut Vec<Append>) {
        for lane in &mut self.lanes {
            lane.tick(now_ms, &mut self.sink);
            self.plant.drain(&mut self.sink, out);
        }
        self.plant.tick(now_ms, out);
    }
}
