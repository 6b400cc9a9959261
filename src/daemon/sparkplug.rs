//! The Sparkplug B links (`[sparkplug]`; the pure half is [`crate::wire::sparkplug`]).
//! Sparkplug wants clean sessions and QoS 0 data, unlike the result link, so they are
//! connections of their own, with the broker settings of `[broker]` and their own
//! client ids:
//!
//! - the **host** connection (client id + `-h`) reads the edge nodes the inputs name and
//!   hands their metrics to the evaluator as readings on the `spb:` keys; it publishes
//!   rebirth requests (NCMD), and `spBv1.0/STATE/<host_id>` (retained, QoS 1, with an
//!   offline will) when `host_id` is set;
//! - the **edge** connection (client id + `-e`) publishes eqwatch's results as an edge
//!   node when `publish` is on: NDEATH as the will with the session's bdSeq, NBIRTH and a
//!   DBIRTH per reactor on every connection, DDATA per result; results that arrive while
//!   it is down are kept (up to [`HELD_MAX`]) and sent after the births as historical.
//!   An NCMD `Node Control/Rebirth` gets the births again.

use std::collections::VecDeque;
use std::sync::Arc;
use std::sync::atomic::Ordering::Relaxed;
use std::time::Duration;

use rumqttc::{AsyncClient, Event, Incoming, LastWill, QoS};
use tokio::sync::mpsc;
use tokio_util::sync::CancellationToken;
use tracing::{info, warn};

use super::mqtt::{Connection, LinkError, base_options, client_id_with, disconnect};
use super::{Clock, RawInput, ResultCopy};
use crate::config::{BrokerSettings, SparkplugSettings, SpbRef};
use crate::pipeline::metrics::Metrics;
use crate::wire::sparkplug::{self as spb, Consumer, EdgeNode, NodeId};

/// The Sparkplug B payload types (prost, generated from proto/sparkplug_b.proto), for
/// tools and tests that speak to eqwatch over Sparkplug.
pub use crate::wire::sparkplug_b::{Payload, payload};

/// Results kept for the edge connection while it is down at most (oldest dropped).
pub const HELD_MAX: usize = 4096;

fn client_base(s: &SparkplugSettings, b: &BrokerSettings) -> String {
    s.client_id.clone().unwrap_or_else(|| b.client_id.clone())
}

/// The host connection: edge nodes in, readings to the evaluator.
pub struct HostLink {
    pub broker: BrokerSettings,
    pub settings: SparkplugSettings,
    pub inputs: Vec<SpbRef>,
    pub clock: Clock,
}

impl HostLink {
    pub async fn run(
        self,
        input: mpsc::Sender<RawInput>,
        metrics: Arc<Metrics>,
        stop: CancellationToken,
    ) -> Result<(), LinkError> {
        let mut o = base_options(
            &self.broker,
            client_id_with(&client_base(&self.settings, &self.broker), "h"),
        )?;
        o.set_clean_session(true);
        if let Some(h) = &self.settings.host_id {
            o.set_last_will(LastWill::new(
                spb::state_topic(h),
                spb::state_payload(false, (self.clock)()).into_bytes(),
                QoS::AtLeastOnce,
                true,
            ));
        }
        let (client, mut eventloop) = AsyncClient::new(o, 64);
        let mut consumer = Consumer::new(
            &self.inputs,
            self.settings.reorder_timeout.as_millis() as i64,
        );
        let subscriptions = consumer.subscriptions();
        let mut conn = Connection::new("sparkplug host", &self.broker);
        let mut tick = tokio::time::interval(Duration::from_millis(100));
        tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Delay);
        loop {
            let events = tokio::select! {
                ev = eventloop.poll() => match ev {
                    Ok(Event::Incoming(Incoming::ConnAck(ack))) => {
                        conn.up(ack.session_present);
                        for t in &subscriptions {
                            if let Err(e) = client.try_subscribe(t.clone(), QoS::AtMostOnce) {
                                warn!(topic = %t, error = %e, "sparkplug subscribe request not queued");
                            }
                        }
                        if let Some(h) = &self.settings.host_id {
                            let _ = client.try_publish(spb::state_topic(h), QoS::AtLeastOnce, true, spb::state_payload(true, (self.clock)()));
                        }
                        Vec::new()
                    }
                    Ok(Event::Incoming(Incoming::Publish(p))) => {
                        consumer.message(&p.topic, &p.payload, (self.clock)())
                    }
                    Ok(_) => Vec::new(),
                    Err(e) => {
                        let delay = conn.lost(&e);
                        tokio::select! {
                            _ = tokio::time::sleep(delay) => {}
                            _ = stop.cancelled() => break,
                        }
                        Vec::new()
                    }
                },
                _ = tick.tick() => consumer.tick((self.clock)()),
                _ = stop.cancelled() => break,
            };
            for ev in events {
                match ev {
                    spb::Event::Input { key, payload } => {
                        let raw = RawInput {
                            topic: key,
                            payload: payload.into_bytes(),
                            arrival_ms: (self.clock)(),
                        };
                        if input.send(raw).await.is_err() {
                            return Ok(()); // the evaluator is gone (shutdown)
                        }
                    }
                    spb::Event::Rebirth {
                        topic,
                        payload,
                        why,
                    } => {
                        info!(topic = %topic, reason = why, "sparkplug: asking the edge node for a rebirth");
                        let _ = client.try_publish(topic, QoS::AtMostOnce, false, payload);
                    }
                }
            }
            let c = consumer.counts;
            metrics.spb_messages.store(c.messages, Relaxed);
            metrics.spb_undecodable.store(c.undecodable, Relaxed);
            metrics.spb_gaps.store(c.gaps, Relaxed);
            metrics
                .spb_rebirths_requested
                .store(c.rebirths_requested, Relaxed);
            metrics.spb_deaths.store(c.deaths, Relaxed);
        }
        if let Some(h) = &self.settings.host_id {
            let _ = client.try_publish(
                spb::state_topic(h),
                QoS::AtLeastOnce,
                true,
                spb::state_payload(false, (self.clock)()),
            );
        }
        disconnect(&client, &mut eventloop).await;
        Ok(())
    }
}

/// The edge connection: eqwatch's results as a Sparkplug edge node.
pub struct EdgeLink {
    pub broker: BrokerSettings,
    pub settings: SparkplugSettings,
    pub reactors: Vec<String>,
    pub clock: Clock,
}

impl EdgeLink {
    pub async fn run(
        self,
        mut results: mpsc::Receiver<ResultCopy>,
        metrics: Arc<Metrics>,
        stop: CancellationToken,
    ) -> Result<(), LinkError> {
        let id = NodeId {
            group: self.settings.group_id.clone(),
            node: self.settings.edge_node_id.clone(),
        };
        let ncmd = spb::topic("NCMD", &id, None);
        let mut node = EdgeNode::new(id, self.reactors.clone());
        let mut o = base_options(
            &self.broker,
            client_id_with(&client_base(&self.settings, &self.broker), "e"),
        )?;
        o.set_clean_session(true);
        let will = |node: &mut EdgeNode, now: i64| {
            let (t, b) = node.next_session_will(now);
            LastWill::new(t, b, QoS::AtLeastOnce, false)
        };
        o.set_last_will(will(&mut node, (self.clock)()));
        let (client, mut eventloop) = AsyncClient::new(o, HELD_MAX + 64);
        let mut conn = Connection::new("sparkplug edge", &self.broker);
        let mut up = false;
        let mut held: VecDeque<ResultCopy> = VecDeque::new();
        let mut results_open = true;
        loop {
            tokio::select! {
                ev = eventloop.poll() => match ev {
                    Ok(Event::Incoming(Incoming::ConnAck(ack))) => {
                        conn.up(ack.session_present);
                        up = true;
                        let _ = client.try_subscribe(ncmd.clone(), QoS::AtMostOnce);
                        self.births(&client, &mut node, &mut held, &metrics);
                    }
                    Ok(Event::Incoming(Incoming::Publish(p))) if p.topic == ncmd => {
                        if spb::is_rebirth_request(&p.payload) {
                            info!("sparkplug: rebirth requested; publishing the births again");
                            // A rebirth within a session keeps its bdSeq (Sparkplug 3.0).
                            self.births(&client, &mut node, &mut held, &metrics);
                        }
                    }
                    Ok(_) => {}
                    Err(e) => {
                        up = false;
                        // The next connection's will carries the next session's bdSeq.
                        eventloop.mqtt_options.set_last_will(will(&mut node, (self.clock)()));
                        let delay = conn.lost(&e);
                        tokio::select! {
                            _ = tokio::time::sleep(delay) => {}
                            _ = stop.cancelled() => break,
                        }
                    }
                },
                r = results.recv(), if results_open => match r {
                    None => results_open = false,
                    Some(r) if up => {
                        if let Some((t, b)) = node.data(&r.reactor, &r.payload, r.late, (self.clock)())
                            && client.try_publish(t, QoS::AtMostOnce, false, b).is_ok()
                        {
                            metrics.spb_published.fetch_add(1, Relaxed);
                        }
                    }
                    Some(r) => {
                        if !r.late {
                            node.remember(&r.reactor, &r.payload);
                        }
                        if held.len() == HELD_MAX {
                            held.pop_front();
                            metrics.spb_held_dropped.fetch_add(1, Relaxed);
                        }
                        held.push_back(r);
                    }
                },
                _ = stop.cancelled() => break,
            }
        }
        if up {
            // A clean stop: the NDEATH ourselves (the broker sends the will only when the
            // connection is lost).
            let (t, b) = node.death_now((self.clock)());
            let _ = client.try_publish(t, QoS::AtLeastOnce, false, b);
        }
        disconnect(&client, &mut eventloop).await;
        Ok(())
    }

    fn births(
        &self,
        client: &AsyncClient,
        node: &mut EdgeNode,
        held: &mut VecDeque<ResultCopy>,
        metrics: &Metrics,
    ) {
        let now = (self.clock)();
        for (t, b) in node.births(now) {
            let _ = client.try_publish(t, QoS::AtMostOnce, false, b);
        }
        let n = held.len();
        for r in held.drain(..) {
            if let Some((t, b)) = node.data(&r.reactor, &r.payload, true, now)
                && client.try_publish(t, QoS::AtMostOnce, false, b).is_ok()
            {
                metrics.spb_published.fetch_add(1, Relaxed);
            }
        }
        if n > 0 {
            info!(
                results = n,
                "sparkplug: results held while the edge connection was down sent as historical"
            );
        }
    }
}
