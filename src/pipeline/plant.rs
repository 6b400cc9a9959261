//! The plant-wide part of the pipeline: alarm-flood self-monitoring over every
//! lane's events (ISA-18.2: more than 10 alarms in 10 minutes per operator).

use std::sync::Arc;
use std::sync::atomic::Ordering::Relaxed;

use tracing::warn;

use super::Append;
use super::lane::Sink;
use super::metrics::Metrics;
use crate::config::Settings;
use crate::monitor::alarm::Event;
use crate::monitor::watch::PlantWatch;
use crate::wire::watch as wp;

/// The plant-wide part: alarm-flood self-monitoring over every lane's events.
pub struct Plant {
    watch: PlantWatch,
    metrics: Arc<Metrics>,
    alert_topic: String,
    alarms_topic: String,
    trains: Vec<crate::wire::train::Train>,
}

impl Plant {
    pub(super) fn new(settings: &Settings, metrics: Arc<Metrics>) -> Self {
        Self {
            watch: PlantWatch::new(),
            metrics,
            alert_topic: settings.daemon_topic("alert"),
            alarms_topic: settings.daemon_topic("alarms"),
            trains: settings
                .trains
                .iter()
                .map(|t| crate::wire::train::Train::new(t, &settings.site, &settings.topic_prefix))
                .collect(),
        }
    }

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
        // Each train a member of which has a new result: its summary, after the records.
        let members = std::mem::take(&mut sink.members);
        for t in &mut self.trains {
            let mut changed = false;
            for m in &members {
                changed |= t.update(m);
            }
            if changed {
                out.push(Append {
                    topic: t.topic.clone(),
                    retain: true,
                    point: None,
                    payload: t.encode(),
                });
            }
        }
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
                point: None,
                payload: wp::encode_flood_event(&self.watch, e),
            });
        }
        out.push(Append {
            topic: self.alarms_topic.clone(),
            retain: true,
            point: None,
            payload: wp::encode_plant_states(&self.watch, now_ms),
        });
    }
}
