//! The broker link: one task owns the rumqttc `EventLoop`, polls it, and hands journal
//! records to the client from the [`Outbox`] with `try_publish` (never an awaiting
//! publish from the polling task, which could deadlock on a full request channel; the
//! request channel is sized above the in-flight window so `try_publish` does not fail).
//!
//! Connection handling is ours: exponential backoff with jitter between attempts (the
//! client would otherwise retry in a tight loop), reset only after a connection has
//! stayed up; subscriptions renewed on every ConnAck (with or without a session); the
//! `online` status (retained) on every connection, with `offline` as last will and an
//! explicit `offline` on clean shutdown.

use std::sync::Arc;
use std::sync::atomic::Ordering::Relaxed;
use std::time::{Duration, Instant};

use rumqttc::{
    AsyncClient, Event, EventLoop, Incoming, LastWill, MqttOptions, Outgoing as Out, QoS,
    TlsConfiguration, Transport,
};
use tokio::sync::mpsc;
use tokio_util::sync::CancellationToken;
use tracing::{debug, info, warn};

use super::outbox::{Offer, Outbox};
use super::{Clock, JournalCmd, RawInput, ToLink, now_ms};
use crate::config::{BrokerSettings, MqttProtocol};
use crate::pipeline::metrics::Metrics;
use crate::wire::result::with_delivery;

/// A connection that stayed up this long resets the backoff.
const STABLE: Duration = Duration::from_secs(10);
/// Records older than this when handed over are marked late.
const LATE_MS: i64 = 10_000;
/// Records held in memory by the outbox; the rest wait on disk.
const OUTBOX_CAPACITY: usize = 4096;

#[derive(Debug, thiserror::Error)]
pub enum LinkError {
    #[error("broker options: {0}")]
    Options(String),
}

/// Builds client options from validated settings (every value was checked by the
/// configuration, so no setter here can panic).
pub fn options(
    b: &BrokerSettings,
    status_topic: &str,
    will: &str,
) -> Result<MqttOptions, LinkError> {
    if b.protocol == MqttProtocol::V5 {
        return Err(LinkError::Options(
            "MQTT 5 is accepted in the configuration but this build speaks MQTT 3.1.1 only; set broker.protocol = \"3.1.1\"".into(),
        ));
    }
    let mut o = MqttOptions::new(b.client_id.clone(), b.host.clone(), b.port);
    o.set_keep_alive(b.keep_alive);
    o.set_clean_session(b.session_expiry.is_zero());
    o.set_max_packet_size(b.max_packet_bytes, b.max_packet_bytes);
    o.set_inflight(b.inflight);
    o.set_last_will(LastWill::new(
        status_topic,
        will.as_bytes().to_vec(),
        QoS::AtLeastOnce,
        true,
    ));
    if let Some(u) = &b.username {
        o.set_credentials(u.clone(), b.password.clone().unwrap_or_default());
    }
    if b.tls {
        let read = |p: &std::path::Path| {
            std::fs::read(p).map_err(|e| LinkError::Options(format!("{}: {e}", p.display())))
        };
        let transport = match &b.ca_file {
            Some(ca) => {
                let client_auth = match (&b.client_cert_file, &b.client_key_file) {
                    (Some(c), Some(k)) => Some((read(c)?, read(k)?)),
                    _ => None,
                };
                Transport::tls_with_config(TlsConfiguration::Simple {
                    ca: read(ca)?,
                    alpn: None,
                    client_auth,
                })
            }
            None => Transport::tls_with_default_config(),
        };
        o.set_transport(transport);
    }
    Ok(o)
}

/// How long a connection stayed up, for the log: `42 s`, `3.5 min`, `2.0 h`.
fn up_for(d: Duration) -> String {
    let s = d.as_secs_f64();
    if s < 120.0 {
        format!("{s:.0} s")
    } else if s < 7200.0 {
        format!("{:.1} min", s / 60.0)
    } else {
        format!("{:.1} h", s / 3600.0)
    }
}

/// Small xorshift for backoff jitter (no cryptographic need).
struct Jitter(u64);

impl Jitter {
    fn next_unit(&mut self) -> f64 {
        self.0 ^= self.0 << 13;
        self.0 ^= self.0 >> 7;
        self.0 ^= self.0 << 17;
        (self.0 >> 11) as f64 / (1u64 << 53) as f64
    }
}

pub struct Link {
    pub broker: BrokerSettings,
    pub topics: Vec<String>,
    pub status_topic: String,
    pub online_payload: String,
    pub offline_payload: String,
    pub published_at_start: u64,
    pub journal_last_at_start: u64,
    pub clock: Clock,
}

impl Link {
    /// Runs until shutdown: `stop_input` stops taking input; the link then delivers
    /// everything the journal still sends (until [`ToLink::Drained`]), says `offline`
    /// and disconnects. `deadline` bounds the flush after `stop_input`.
    #[allow(clippy::too_many_arguments)]
    pub async fn run(
        self,
        client: AsyncClient,
        mut eventloop: EventLoop,
        mut from_journal: mpsc::Receiver<ToLink>,
        journal: mpsc::Sender<JournalCmd>,
        input: mpsc::Sender<RawInput>,
        metrics: Arc<Metrics>,
        stop_input: CancellationToken,
        flush_deadline: Duration,
    ) {
        let window = usize::from(self.broker.inflight.max(1));
        let mut outbox = Outbox::new(self.published_at_start, OUTBOX_CAPACITY);
        outbox.journal_at(self.journal_last_at_start);
        let mut input = Some(input);
        let mut drained = false;
        let mut connected_since: Option<Instant> = None;
        let mut ever_connected = false;
        let mut failures: u32 = 0;
        let broker = format!("{}:{}", self.broker.host, self.broker.port);
        let mut jitter = Jitter(now_ms() as u64 | 1);
        let mut stop_at: Option<Instant> = None;
        let mut tick = tokio::time::interval(Duration::from_millis(500));
        loop {
            // Ask the journal for records memory does not hold.
            if let Some(after) = outbox.wants_read() {
                let read = JournalCmd::ReadAfter {
                    after,
                    max: OUTBOX_CAPACITY / 2,
                };
                if journal.try_send(read).is_err() {
                    // The journal is busy: ask again on a later turn.
                    outbox.read_done();
                }
            }
            // Hand records over while connected and the window allows.
            if connected_since.is_some() {
                while let Some(r) = outbox.next(window) {
                    let late = r.replayed || (self.clock)() - r.ts_ms > LATE_MS;
                    let body = with_delivery(&r.payload, r.seq, late);
                    match client.try_publish(r.topic.clone(), QoS::AtLeastOnce, r.retain, body) {
                        Ok(()) => outbox.handed_front(),
                        Err(e) => {
                            metrics.publish_failures.fetch_add(1, Relaxed);
                            debug!(error = %e, "request channel full; publishing resumes after the next event");
                            break;
                        }
                    }
                }
            }
            metrics
                .journal_published_seq
                .store(outbox.watermark(), Relaxed);
            if stop_input.is_cancelled() && stop_at.is_none() {
                stop_at = Some(Instant::now() + flush_deadline);
                input = None; // the evaluator finishes what it has, then the journal says Drained
                info!("shutdown: input stopped, delivering what is journaled");
            }
            if let Some(at) = stop_at {
                let flushed = drained && outbox.queued() == 0 && outbox.in_flight() == 0;
                if flushed || Instant::now() >= at {
                    if !flushed {
                        warn!(
                            backlog = outbox.backlog(),
                            "shutdown deadline reached; the journal keeps the rest for the next start"
                        );
                    }
                    break;
                }
            }
            tokio::select! {
                // Poll only while the evaluator can take a message: the link never waits on
                // the evaluator (which may wait on the journal, which may wait on the link).
                ev = eventloop.poll(), if input.as_ref().is_none_or(|t| t.capacity() > 0) => match ev {
                    Ok(Event::Incoming(Incoming::ConnAck(ack))) => {
                        metrics.connected.store(true, Relaxed);
                        connected_since = Some(Instant::now());
                        ever_connected = true;
                        info!(session_present = ack.session_present, "connected to broker {broker}");
                        if !ack.session_present {
                            outbox.on_new_session();
                        }
                        // Subscribe on every connection: a broker may claim a session it
                        // does not have (or lost), and subscribing again is harmless
                        // (retained repeats are refused as duplicates by the monitor).
                        for t in &self.topics {
                            if let Err(e) = client.try_subscribe(t.clone(), QoS::AtLeastOnce) {
                                warn!(topic = %t, error = %e, "subscribe request not queued");
                            }
                        }
                        if client.try_publish(self.status_topic.clone(), QoS::AtLeastOnce, true, self.online_payload.clone()).is_ok() {
                            outbox.handed_untracked();
                        }
                    }
                    Ok(Event::Incoming(Incoming::Publish(p))) => {
                        metrics.messages_in.fetch_add(1, Relaxed);
                        if let Some(tx) = &input {
                            let raw = RawInput { topic: p.topic.clone(), payload: p.payload.to_vec(), arrival_ms: (self.clock)() };
                            match tx.try_send(raw) {
                                Ok(()) => {}
                                Err(mpsc::error::TrySendError::Closed(_)) => input = None,
                                // Not reached: polling waits for capacity and this task is the only sender.
                                Err(mpsc::error::TrySendError::Full(_)) => warn!("input queue full; message dropped"),
                            }
                        }
                    }
                    Ok(Event::Incoming(Incoming::PubAck(a))) => {
                        if let Some(w) = outbox.on_ack(a.pkid) {
                            metrics.published.store(w.saturating_sub(self.published_at_start), Relaxed);
                            // A later acknowledgement carries a higher watermark, so a
                            // busy journal may skip this one.
                            let _ = journal.try_send(JournalCmd::Published { seq: w, force: false });
                        }
                    }
                    Ok(Event::Incoming(Incoming::SubAck(s))) => {
                        if s.return_codes.iter().any(|c| matches!(c, rumqttc::SubscribeReasonCode::Failure)) {
                            warn!("the broker refused a subscription (check its ACL)");
                        }
                    }
                    Ok(Event::Outgoing(Out::Publish(pkid))) => outbox.on_outgoing(pkid),
                    Ok(_) => {}
                    Err(e) => {
                        let was_up = connected_since.take();
                        metrics.connected.store(false, Relaxed);
                        metrics.reconnects.fetch_add(1, Relaxed);
                        if was_up.is_some_and(|t| t.elapsed() >= STABLE) {
                            failures = 0;
                        }
                        failures = failures.saturating_add(1);
                        let base = self.broker.reconnect_min.as_secs_f64() * 2f64.powi(failures.min(30) as i32 - 1);
                        let cap = base.min(self.broker.reconnect_max.as_secs_f64());
                        // "Equal jitter": half fixed, half random.
                        let delay = Duration::from_secs_f64(cap * (0.5 + 0.5 * jitter.next_unit()));
                        let retry = format!("{:.1} s", delay.as_secs_f64());
                        match was_up {
                            Some(t) => warn!(error = %e, retry_in = %retry, "connection to broker {broker} lost after {}", up_for(t.elapsed())),
                            None if ever_connected => warn!(error = %e, retry_in = %retry, attempt = failures, "could not reconnect to broker {broker}"),
                            None => warn!(error = %e, retry_in = %retry, attempt = failures, "could not connect to broker {broker} (never connected since start)"),
                        }
                        let sleep_until = stop_at.map_or(delay, |at| delay.min(at.saturating_duration_since(Instant::now())));
                        tokio::select! {
                            _ = tokio::time::sleep(sleep_until) => {}
                            _ = stop_input.cancelled(), if stop_at.is_none() => {}
                        }
                    }
                },
                msg = from_journal.recv(), if !drained => match msg {
                    Some(ToLink::Records(records)) => {
                        for r in records {
                            if outbox.offer(r) == Offer::Deferred {
                                debug!("record deferred to a journal read");
                            }
                        }
                    }
                    Some(ToLink::ReadDone) => outbox.read_done(),
                    Some(ToLink::JournalAt(last)) => outbox.journal_at(last),
                    Some(ToLink::Drained) | None => drained = true,
                },
                _ = tick.tick() => {}
                _ = stop_input.cancelled(), if stop_at.is_none() => {}
            }
        }
        // Stop taking records first, so a journal thread waiting on a full queue is released
        // (anything it still had is on disk and goes out after the next start).
        drop(from_journal);
        let _ = journal
            .send(JournalCmd::Published {
                seq: outbox.watermark(),
                force: true,
            })
            .await;
        // Say offline (retained) and wait briefly for its acknowledgement, then disconnect.
        if connected_since.is_some() {
            let offline = client.try_publish(
                self.status_topic.clone(),
                QoS::AtLeastOnce,
                true,
                self.offline_payload.clone(),
            );
            if offline.is_ok() {
                let until = Instant::now() + Duration::from_secs(3);
                while Instant::now() < until {
                    match tokio::time::timeout(Duration::from_millis(200), eventloop.poll()).await {
                        Ok(Ok(Event::Incoming(Incoming::PubAck(_)))) => break,
                        Ok(Ok(_)) | Err(_) => {}
                        Ok(Err(_)) => break,
                    }
                }
            }
            let _ = client.try_disconnect();
            let until = Instant::now() + Duration::from_secs(1);
            while Instant::now() < until {
                match tokio::time::timeout(Duration::from_millis(200), eventloop.poll()).await {
                    Ok(Ok(Event::Outgoing(Out::Disconnect))) | Ok(Err(_)) => break,
                    _ => {}
                }
            }
        }
        metrics.connected.store(false, Relaxed);
        drop(client);
    }
}
