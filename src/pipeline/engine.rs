//! The daemon's processing path, synchronous and deterministic: route a message,
//! decode it, hand it to the reactor's monitor, run the watch (drift, alerts, alarms)
//! over each evaluation, carry out commands, and produce the records to journal and
//! publish. The live daemon feeds it MQTT messages; `eqwatch replay` feeds it CSV rows
//! (already decoded) through [`Engine::accept`], so both take the same path after
//! decoding. No tokio, no I/O, no clock: time is passed in.

use std::collections::HashMap;
use std::sync::Arc;
use std::sync::atomic::Ordering::Relaxed;

use tracing::{debug, info, warn};

use super::metrics::Metrics;
use super::{Append, RawInput};
use crate::config::{CompositionSource, Settings};
use crate::monitor::alarm::{Event, EventKind};
use crate::monitor::spec::SteamRatioSpec;
use crate::monitor::watch::{Class, DriftFigures, PlantWatch, ReactorWatch, WatchEvent};
use crate::monitor::{Evaluation, Input, Outcome, Quality, ReactorMonitor};
use crate::wire;
use crate::wire::input::DecodeError;
use crate::wire::watch::{self as wp, Command};

/// What an input topic feeds.
#[derive(Debug, Clone, Copy)]
pub enum Route {
    Temperature(usize, usize),
    Pressure(usize),
    SteamRatio(usize),
    Analysis(usize),
    Component(usize, usize),
    Command(usize),
}

/// Topic → routes for every input and command topic of the configuration.
pub fn routes(s: &Settings) -> HashMap<String, Vec<Route>> {
    let mut m: HashMap<String, Vec<Route>> = HashMap::new();
    for (r, rs) in s.reactors.iter().enumerate() {
        for (i, t) in rs.wiring.temperatures.iter().enumerate() {
            m.entry(t.topic.clone())
                .or_default()
                .push(Route::Temperature(r, i));
        }
        m.entry(rs.wiring.pressure.topic.clone())
            .or_default()
            .push(Route::Pressure(r));
        if let Some(ss) = &rs.wiring.steam_ratio {
            m.entry(ss.topic.clone())
                .or_default()
                .push(Route::SteamRatio(r));
        }
        match &rs.wiring.composition {
            CompositionSource::Analyser { topic, .. } => {
                m.entry(topic.clone()).or_default().push(Route::Analysis(r))
            }
            CompositionSource::PerComponent { topics, .. } => {
                for (species, topic) in topics {
                    if let Some(c) = rs
                        .spec
                        .composition
                        .components
                        .iter()
                        .position(|x| x.eq_ignore_ascii_case(species))
                    {
                        m.entry(topic.clone())
                            .or_default()
                            .push(Route::Component(r, c));
                    }
                }
            }
        }
        m.entry(format!("{}/{}/command", s.topic_prefix, rs.spec.id))
            .or_default()
            .push(Route::Command(r));
    }
    m
}

/// One evaluation as kept for plots (replay): compact (f32, NaN for "none"), since a
/// year holds half a million of them.
#[derive(Debug, Clone, Copy)]
pub struct TracePoint {
    pub t_ms: i64,
    pub good: bool,
    /// A bad result: a gap in both charts (an approach that is only not meaningful, as
    /// at a methanator, leaves the key component chart drawn).
    pub bad: bool,
    pub approach_k: f32,
    pub uncertainty_k: f32,
    pub key_measured: f32,
    pub key_equilibrium: f32,
    /// Wet H2O mole fraction of the gas as evaluated and at equilibrium (NaN when the
    /// model has no water), to put the key component on a dry basis.
    pub water_measured: f32,
    pub water_equilibrium: f32,
}

fn compact(x: Option<f64>) -> f32 {
    x.map_or(f32::NAN, |v| v as f32)
}

/// `None` for NaN.
pub fn expand(x: f32) -> Option<f64> {
    (!x.is_nan()).then_some(f64::from(x))
}

/// An alert or alarm event as kept for plots (replay).
#[derive(Debug, Clone)]
pub struct TraceEvent {
    pub t_ms: i64,
    pub class: Class,
    pub alarm: String,
    pub kind: EventKind,
}

/// A baseline in force from `from_ms` (to the next span's start).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TraceBaseline {
    pub from_ms: i64,
    pub to_ms: i64,
    pub approach_k: f64,
    pub sigma_k: f64,
}

/// Per-reactor trace for plots: slim points, events, baselines and the last drift
/// figures (the trend and forecast at the end).
#[derive(Debug, Clone, Default)]
pub struct Trace {
    pub points: Vec<TracePoint>,
    pub events: Vec<TraceEvent>,
    pub baselines: Vec<TraceBaseline>,
    pub last_drift: Option<DriftFigures>,
    /// Off-line periods (from, to; `None` = still off line at the end).
    pub offline: Vec<(i64, Option<i64>)>,
    /// Steady-state aggregates of every run: (middle of the period ms, mean approach K).
    pub aggregates: Vec<(i64, f64)>,
    /// The run and the number of its aggregates already copied into `aggregates`.
    pub aggregates_seen: (Option<i64>, usize),
}

struct Topics {
    result: String,
    alert: String,
    alarm: String,
    alarms: String,
    outcome: String,
}

/// Records made by a [`Lane`], with the points at which the plant-wide self-monitoring
/// must look at the events published so far (see [`Plant::drain`]).
#[derive(Debug, Default)]
pub struct Sink {
    pub records: Vec<Append>,
    marks: Vec<Mark>,
}

#[derive(Debug)]
struct Mark {
    /// `records.len()` when the events were published.
    at: usize,
    events: Vec<WatchEvent>,
    now_ms: i64,
}

impl Sink {
    pub fn is_empty(&self) -> bool {
        self.records.is_empty() && self.marks.is_empty()
    }
    /// Whether alert or alarm events were published (the flood count must see them).
    pub fn has_events(&self) -> bool {
        !self.marks.is_empty()
    }
}

/// One reactor's processing: monitor, watch, encoding. Independent of the other
/// reactors (replay runs lanes on several threads); what is plant-wide is in [`Plant`].
pub struct Lane {
    r: usize,
    settings: Arc<Settings>,
    metrics: Arc<Metrics>,
    monitor: ReactorMonitor,
    watch: ReactorWatch,
    topics: Topics,
    /// Kept when enabled (replay plots).
    pub trace: Option<Trace>,
}

/// The plant-wide part: alarm-flood self-monitoring over every lane's events.
pub struct Plant {
    watch: PlantWatch,
    metrics: Arc<Metrics>,
    alert_topic: String,
    alarms_topic: String,
}

/// See the module docs.
pub struct Engine {
    settings: Arc<Settings>,
    routes: HashMap<String, Vec<Route>>,
    lanes: Vec<Lane>,
    plant: Plant,
    metrics: Arc<Metrics>,
    sink: Sink,
}

impl Engine {
    /// Builds the engine; the alarm configurations were validated with the settings.
    pub fn new(settings: Arc<Settings>, metrics: Arc<Metrics>) -> Result<Self, String> {
        let p = &settings.topic_prefix;
        let mut lanes = Vec::with_capacity(settings.reactors.len());
        for (r, rs) in settings.reactors.iter().enumerate() {
            lanes.push(Lane {
                r,
                settings: settings.clone(),
                metrics: metrics.clone(),
                monitor: ReactorMonitor::new(&rs.spec),
                watch: ReactorWatch::new(&rs.spec.watch)
                    .map_err(|e| format!("reactors.{}: {e}", rs.spec.id))?,
                topics: Topics {
                    result: format!("{p}/{}/result", rs.spec.id),
                    alert: format!("{p}/{}/alert", rs.spec.id),
                    alarm: format!("{p}/{}/alarm", rs.spec.id),
                    alarms: format!("{p}/{}/alarms", rs.spec.id),
                    outcome: format!("{p}/{}/command/outcome", rs.spec.id),
                },
                trace: None,
            });
        }
        Ok(Self {
            routes: routes(&settings),
            lanes,
            plant: Plant {
                watch: PlantWatch::new(),
                metrics: metrics.clone(),
                alert_topic: format!("{p}/alert"),
                alarms_topic: format!("{p}/alarms"),
            },
            metrics,
            sink: Sink::default(),
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
            .map(|u| {
                let rs = &self.settings.reactors[u.r];
                (
                    rs.spec.id.clone(),
                    format!("{:?}", rs.spec.watch.drift),
                    u.watch.drift_snapshot(),
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
            .map(|u| {
                (
                    self.settings.reactors[u.r].spec.id.clone(),
                    u.watch.alarm_snapshots(),
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
        let mut t: Vec<String> = self.routes.keys().cloned().collect();
        t.sort();
        t
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
                    warn!(reactor = %self.settings.reactors[r].spec.id, topic = %raw.topic, reason = %e.reason(), error = %e, "input rejected");
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

impl Plant {
    /// Moves a lane's records to `out`, running the flood count where the lane published
    /// events (so the flood alert lands right after the events that made it).
    pub fn drain(&mut self, sink: &mut Sink, out: &mut Vec<Append>) {
        let mut records = sink.records.drain(..);
        let mut done = 0;
        for m in sink.marks.drain(..) {
            out.extend(records.by_ref().take(m.at - done));
            done = m.at;
            let flood = self.watch.observe(&m.events, m.now_ms);
            self.events(flood, m.now_ms, out);
        }
        out.extend(records);
    }

    /// The flood window moves on with time.
    pub fn tick(&mut self, now_ms: i64, out: &mut Vec<Append>) {
        let ev = self.watch.tick(now_ms);
        self.events(ev, now_ms, out);
    }

    fn events(&mut self, ev: Vec<Event>, now_ms: i64, out: &mut Vec<Append>) {
        self.metrics
            .alarms_last_10min
            .store(self.watch.rate() as u64, Relaxed);
        self.metrics.floods.store(self.watch.floods, Relaxed);
        if ev.is_empty() {
            return;
        }
        for e in &ev {
            warn!(event = %wp::event_name(&e.kind), rate = self.watch.rate(), "alarm flood alert");
            out.push(Append {
                topic: self.alert_topic.clone(),
                retain: false,
                payload: wp::encode_flood_event(&self.watch, e),
            });
        }
        out.push(Append {
            topic: self.alarms_topic.clone(),
            retain: true,
            payload: wp::encode_plant_states(&self.watch, now_ms),
        });
    }
}

impl Lane {
    /// Index of the reactor in the configuration.
    pub fn reactor(&self) -> usize {
        self.r
    }

    /// One decoded input.
    pub fn accept(&mut self, input: Input, arrival_ms: i64, now_ms: i64, sink: &mut Sink) {
        let settings = Arc::clone(&self.settings);
        let rs = &settings.reactors[self.r];
        let metrics = Arc::clone(&self.metrics);
        let rm = &metrics.reactors[self.r];
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
                warn!(reactor = %rs.spec.id, last = %crate::timefmt::format_rfc3339(last_ts_ms), "analysis older than the last one refused");
            }
            Outcome::TooOld => {
                rm.too_old.fetch_add(1, Relaxed);
            }
            Outcome::Evaluated(e) => self.evaluated(&e, arrival_ms, now_ms, sink),
        }
    }

    fn evaluated(&mut self, e: &Evaluation, arrival_ms: i64, now_ms: i64, sink: &mut Sink) {
        let settings = Arc::clone(&self.settings);
        let rs = &settings.reactors[self.r];
        let metrics = Arc::clone(&self.metrics);
        let rm = &metrics.reactors[self.r];
        let q = match e.quality {
            Quality::Good => 0,
            Quality::Uncertain => 1,
            Quality::Bad => 2,
        };
        rm.evaluations[q].fetch_add(1, Relaxed);
        let first = e.reactions.first();
        let approach = first
            .filter(|_| e.quality != Quality::Bad)
            .and_then(|a| a.approach_k);
        rm.approach_k
            .store(approach.unwrap_or(f64::NAN).to_bits(), Relaxed);
        if e.quality != Quality::Good {
            let codes: Vec<&str> = e
                .reasons
                .iter()
                .filter(|x| x.severity != Quality::Good)
                .map(|x| x.code)
                .collect();
            warn!(reactor = %rs.spec.id, quality = %e.quality.as_str(), reasons = %codes.join(","), "evaluation not good");
        } else {
            debug!(reactor = %rs.spec.id, approach_k = approach.unwrap_or(f64::NAN), "evaluated");
        }
        let (fig, events) = self.watch.observe(&rs.spec.watch, e, now_ms);
        if fig.excluded.is_some() {
            rm.drift_excluded.fetch_add(1, Relaxed);
        }
        rm.trend_k_per_day.store(
            fig.trend.map_or(f64::NAN, |t| t.slope_k_per_day).to_bits(),
            Relaxed,
        );
        let days = match fig.forecast {
            crate::monitor::watch::Forecast::At { at_ms, .. } => {
                (at_ms - e.sample_ts_ms) as f64 / 86_400_000.0
            }
            crate::monitor::watch::Forecast::Reached => 0.0,
            _ => f64::NAN,
        };
        rm.end_of_run_days.store(days.to_bits(), Relaxed);
        if let Some(t) = self.trace.as_mut() {
            let water = settings
                .species
                .index_of("H2O")
                .and_then(|w| rs.spec.model.species().iter().position(|&x| x == w));
            let at = |v: &[f64]| compact(water.and_then(|i| v.get(i).copied()));
            t.points.push(TracePoint {
                t_ms: e.sample_ts_ms,
                good: e.quality == Quality::Good,
                bad: e.quality == Quality::Bad,
                approach_k: compact(approach),
                uncertainty_k: compact(
                    first
                        .filter(|_| e.quality != Quality::Bad)
                        .and_then(|a| a.approach_uncertainty_k),
                ),
                key_measured: compact(e.key_measured),
                key_equilibrium: compact(e.key_equilibrium),
                water_measured: at(&e.mole_fractions),
                water_equilibrium: at(&e.equilibrium_mole_fractions),
            });
            let (run, aggs) = self.watch.aggregates();
            if t.aggregates_seen.0 != run || aggs.len() < t.aggregates_seen.1 {
                t.aggregates_seen = (run, 0);
            }
            if let Some(start) = run {
                for &(day, k) in &aggs[t.aggregates_seen.1..] {
                    t.aggregates
                        .push((start + (day * 86_400_000.0).round() as i64, k));
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
            t.last_drift = Some(fig);
        }
        let payload = wire::result::encode_result(rs, &settings.species, e, arrival_ms, Some(&fig));
        sink.records.push(Append {
            topic: self.topics.result.clone(),
            retain: true,
            payload,
        });
        self.publish_events(events, now_ms, sink);
    }

    /// Publishes events, counts them, republishes the reactor's retained states, and
    /// marks the place for the plant-wide flood count.
    fn publish_events(&mut self, events: Vec<WatchEvent>, now_ms: i64, sink: &mut Sink) {
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

    fn states(&self, now_ms: i64) -> Append {
        Append {
            topic: self.topics.alarms.clone(),
            retain: true,
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

    /// A command message: checked against the allow list, carried out, answered with an
    /// outcome (journaled like every other record).
    pub fn command(&mut self, payload: &[u8], now_ms: i64, sink: &mut Sink) {
        let settings = Arc::clone(&self.settings);
        let rs = &settings.reactors[self.r];
        let outcome_topic = self.topics.outcome.clone();
        let metrics = Arc::clone(&self.metrics);
        let answer = |cmd: Option<&str>,
                      c_alarm: Option<&str>,
                      rid: Option<&str>,
                      user: Option<&str>,
                      client: Option<&str>,
                      outcome: &'static str,
                      message: &str,
                      sink: &mut Sink| {
            metrics.commands[match outcome {
                "accepted" => 0,
                "refused" => 1,
                "not-allowed" => 2,
                _ => 3,
            }]
            .fetch_add(1, Relaxed);
            sink.records.push(Append {
                topic: outcome_topic.clone(),
                retain: false,
                payload: wp::encode_outcome(
                    &rs.spec.id,
                    rid,
                    cmd,
                    c_alarm,
                    user,
                    client,
                    outcome,
                    message,
                    now_ms,
                ),
            });
        };
        let c: Command = match wp::decode_command(payload) {
            Ok(c) => c,
            Err((m, rid, user, client)) => {
                warn!(reactor = %rs.spec.id, error = %m, "command invalid");
                answer(
                    None,
                    None,
                    rid.as_deref(),
                    user.as_deref(),
                    client.as_deref(),
                    "invalid",
                    &m,
                    sink,
                );
                return;
            }
        };
        let name = c.action.as_str();
        if !settings
            .commands
            .allows(c.user.as_deref(), c.client_id.as_deref())
        {
            let m = format!(
                "user {:?} / client id {:?} may not send commands (commands.allowed_users, commands.allowed_clients)",
                c.user.as_deref().unwrap_or("(none)"),
                c.client_id.as_deref().unwrap_or("(none)")
            );
            warn!(reactor = %rs.spec.id, command = %name, user = %c.user.as_deref().unwrap_or("(none)"), client_id = %c.client_id.as_deref().unwrap_or("(none)"), "command refused: not allowed");
            answer(
                Some(name),
                c.alarm.as_deref(),
                c.request_id.as_deref(),
                c.user.as_deref(),
                c.client_id.as_deref(),
                "not-allowed",
                &m,
                sink,
            );
            return;
        }
        let by = c
            .user
            .clone()
            .or_else(|| c.client_id.clone())
            .unwrap_or_default();
        match self
            .watch
            .command(&rs.spec.watch, &c.action, c.alarm.as_deref(), &by, now_ms)
        {
            Ok((m, events)) => {
                info!(reactor = %rs.spec.id, command = %name, alarm = %c.alarm.as_deref().unwrap_or("-"), by = %by, "command carried out");
                answer(
                    Some(name),
                    c.alarm.as_deref(),
                    c.request_id.as_deref(),
                    c.user.as_deref(),
                    c.client_id.as_deref(),
                    "accepted",
                    &m,
                    sink,
                );
                if events.is_empty() {
                    sink.records.push(self.states(now_ms));
                } else {
                    self.publish_events(events, now_ms, sink);
                }
            }
            Err(e) => {
                let m = e.to_string();
                warn!(reactor = %rs.spec.id, command = %name, alarm = %c.alarm.as_deref().unwrap_or("-"), by = %by, error = %m, "command refused");
                answer(
                    Some(name),
                    c.alarm.as_deref(),
                    c.request_id.as_deref(),
                    c.user.as_deref(),
                    c.client_id.as_deref(),
                    "refused",
                    &m,
                    sink,
                );
            }
        }
    }
}

/// Decodes one message for its route.
pub fn decode(s: &Settings, route: Route, raw: &RawInput) -> (usize, Result<Input, DecodeError>) {
    let atm = s.atmosphere_bar;
    match route {
        Route::Temperature(r, i) => {
            let (rs, Some(source)) = (&s.reactors[r], s.reactors[r].wiring.temperatures.get(i))
            else {
                return (r, Err(DecodeError::Missing("(thermocouple)".into())));
            };
            let unit = &rs.spec.temperatures[i].unit;
            (
                r,
                wire::input::decode_scalar(
                    &raw.payload,
                    &source.decoder,
                    unit,
                    atm,
                    raw.arrival_ms,
                )
                .map(|v| Input::Temperature(i, v)),
            )
        }
        Route::Pressure(r) => {
            let rs = &s.reactors[r];
            let (source, unit) = (&rs.wiring.pressure, &rs.spec.pressure.unit);
            (
                r,
                wire::input::decode_scalar(
                    &raw.payload,
                    &source.decoder,
                    unit,
                    atm,
                    raw.arrival_ms,
                )
                .map(Input::Pressure),
            )
        }
        Route::SteamRatio(r) => match (
            &s.reactors[r].spec.steam_ratio,
            &s.reactors[r].wiring.steam_ratio,
        ) {
            (Some(SteamRatioSpec::Measured(ss)), Some(source)) => (
                r,
                wire::input::decode_scalar(
                    &raw.payload,
                    &source.decoder,
                    &ss.unit,
                    atm,
                    raw.arrival_ms,
                )
                .map(Input::SteamRatio),
            ),
            _ => (r, Err(DecodeError::Missing("(steam ratio)".into()))),
        },
        Route::Analysis(r) => (
            r,
            wire::input::decode_analysis(&raw.payload, &s.reactors[r], raw.arrival_ms)
                .map(Input::Analysis),
        ),
        Route::Component(r, c) => {
            let comp = &s.reactors[r].spec.composition;
            let CompositionSource::PerComponent { decoder, .. } = &s.reactors[r].wiring.composition
            else {
                return (r, Err(DecodeError::Missing("(component source)".into())));
            };
            (
                r,
                wire::input::decode_component(&raw.payload, decoder, comp.unit, raw.arrival_ms)
                    .map(|v| Input::Component(c, v)),
            )
        }
        Route::Command(r) => (r, Err(DecodeError::Missing("(command)".into()))),
    }
}
