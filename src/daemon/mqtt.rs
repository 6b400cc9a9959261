//! The broker links: two connections to the same broker, each owned by one task; the
//! input link (rumqttc) lives here.
//!
//! - The **input** link ([`InputLink`], client id as configured) subscribes and hands
//!   messages to the evaluator. It polls its `EventLoop` only while the evaluator's queue
//!   has room, so a busy evaluator pushes back through TCP onto the broker, which keeps
//!   the messages (QoS 1) instead of this process holding them.
//! - The **result** link ([`super::publink::ResultLink`], client id
//!   [`output_client_id`]) publishes journal records from the outbox with QoS 1 over
//!   our own MQTT 3.1.1 client ([`super::mqtt311`]), a burst of records in one write;
//!   it tracks the acknowledgements and carries the status: `online` (retained) on
//!   every connection, `offline` as last will and explicitly on clean shutdown. It
//!   never waits on the evaluator, so acknowledgements keep flowing while input is held
//!   back. This file keeps what both links share: the backoff ([`Connection`]), the TLS
//!   configuration, the client ids and the words for a refused connection.
//!
//! One connection for both would tie them together: it could not stop reading input
//! without also stopping reading the acknowledgements that let results drain, so a
//! flood had to be evaluated as fast as it came and its results spilled to the journal
//! (and past its size cap) while publishing lagged.
//!
//! Connection handling is ours: exponential backoff with jitter between attempts (the
//! client would otherwise retry in a tight loop), reset only after a connection has
//! stayed up; subscriptions renewed on every ConnAck (with or without a session).

use std::sync::Arc;
use std::sync::atomic::Ordering::Relaxed;
use std::time::{Duration, Instant};

use rumqttc::{
    AsyncClient, Event, EventLoop, Incoming, MqttOptions, Outgoing as Out, QoS, TlsConfiguration,
    Transport,
};
use tokio::sync::mpsc;
use tokio_util::sync::CancellationToken;
use tracing::{error, info, warn};

use super::outbox::Outgoing;
use super::{Clock, RawInput, now_ms};
use crate::config::{BrokerSettings, MqttProtocol};
use crate::pipeline::metrics::Metrics;

/// A connection that stayed up this long resets the backoff.
const STABLE: Duration = Duration::from_secs(10);
/// Records older than this when handed over are marked late.
pub(super) const LATE_MS: i64 = 10_000;
/// Records held in memory by the outbox; the rest wait on disk.
pub(super) const OUTBOX_CAPACITY: usize = 4096;

#[derive(Debug, thiserror::Error)]
pub enum LinkError {
    #[error("broker options: {0}")]
    Options(String),
}

/// The result link's client id: the configured one with `-o` and, where that would pass
/// the 23 bytes MQTT 3.1.1 brokers must accept (spec 3.1.3.1), a shortened id with a
/// 4-digit hash of the whole one (so two long ids that share a start do not collide).
pub fn output_client_id(client_id: &str) -> String {
    client_id_with(client_id, "o")
}

/// `client_id` with `-<suffix>`, shortened with a hash to MQTT 3.1.1's 23 bytes.
pub fn client_id_with(client_id: &str, suffix: &str) -> String {
    const MAX: usize = 23;
    if client_id.len() + 1 + suffix.len() <= MAX {
        return format!("{client_id}-{suffix}");
    }
    // FNV-1a, 16 bits folded: only to tell long ids apart, no security need.
    let mut h: u32 = 0x811c_9dc5;
    for b in client_id.bytes() {
        h = (h ^ u32::from(b)).wrapping_mul(0x0100_0193);
    }
    let tag = format!("-{suffix}{:04x}", (h ^ (h >> 16)) & 0xffff);
    let mut cut = MAX - tag.len();
    while !client_id.is_char_boundary(cut) {
        cut -= 1;
    }
    format!("{}{tag}", &client_id[..cut])
}

/// Hands results to the Sparkplug edge node: fresh ones, and those read back from the
/// journal that an earlier process wrote (historical there); never blocks the link.
pub(super) fn copy_results(
    tx: &mpsc::Sender<super::ResultCopy>,
    records: &[Outgoing],
    last_at_start: u64,
    metrics: &Metrics,
) {
    for r in records {
        let late = r.replayed;
        if (late && r.seq > last_at_start) || !r.topic.ends_with("/result") {
            continue;
        }
        let Some(reactor) = r
            .topic
            .strip_suffix("/result")
            .and_then(|t| t.rsplit('/').next())
        else {
            continue;
        };
        let copy = super::ResultCopy {
            reactor: reactor.to_string(),
            payload: crate::wire::result::with_delivery(&r.payload, r.seq, late),
            late,
        };
        if tx.try_send(copy).is_err() {
            metrics.spb_held_dropped.fetch_add(1, Relaxed);
        }
    }
}

/// Client options of the input link: the configured client id, so a broker session
/// (`session_expiry` > 0) keeps the subscriptions and queues input while the daemon is
/// away.
pub fn input_options(b: &BrokerSettings) -> Result<MqttOptions, LinkError> {
    let mut o = base_options(b, b.client_id.clone())?;
    // A message over the configured limit must cost one counted refusal, never the
    // link: rumqttc drops the connection on a packet over its incoming limit, and a
    // retained or persistent-session message would then come back on every
    // reconnect. So the input link reads up to a larger ceiling and the link refuses
    // the payload itself (`InputLink::run`).
    o.set_max_packet_size(input_read_ceiling(b.max_packet_bytes), b.max_packet_bytes);
    Ok(o)
}

/// The largest packet the input link reads: 16 times the configured limit, at least
/// 16 MiB, at most MQTT's largest packet (268,435,455 bytes, MQTT 3.1.1 §2.2.3).
/// Messages beyond it still drop the connection: a broker's `message_size_limit` at
/// the configured limit (deploy/mosquitto/mosquitto.conf) keeps them away.
pub fn input_read_ceiling(limit: usize) -> usize {
    limit.saturating_mul(16).clamp(16 << 20, 268_435_455)
}

/// Options both links share, from validated settings (every value was checked by the
/// configuration, so no setter here can panic).
pub(super) fn base_options(
    b: &BrokerSettings,
    client_id: String,
) -> Result<MqttOptions, LinkError> {
    if b.protocol == MqttProtocol::V5 {
        return Err(LinkError::Options(
            "MQTT 5 is accepted in the configuration but this build speaks MQTT 3.1.1 only; set broker.protocol = \"3.1.1\"".into(),
        ));
    }
    let mut o = MqttOptions::new(client_id, b.host.clone(), b.port);
    o.set_keep_alive(b.keep_alive);
    o.set_clean_session(b.session_expiry.is_zero());
    o.set_max_packet_size(b.max_packet_bytes, b.max_packet_bytes);
    if let Some(u) = &b.username {
        o.set_credentials(u.clone(), b.password.clone().unwrap_or_default());
    }
    if b.tls {
        let config = tls_config(b)?;
        o.set_transport(Transport::tls_with_config(TlsConfiguration::Rustls(
            Arc::new(config),
        )));
    }
    Ok(o)
}

/// A PEM file that could not be read, named with what it was for.
fn pem_problem<'a>(
    path: &'a std::path::Path,
    what: &'a str,
) -> impl Fn(rustls::pki_types::pem::Error) -> LinkError + 'a {
    move |e| LinkError::Options(format!("{}: {what}: {e}", path.display()))
}

/// The TLS client configuration on the ring provider: the CA file's certificates (or the
/// platform's when none is given), and the client certificate and key when configured.
/// Every failure names the file and what is wrong with it.
pub(super) fn tls_config(b: &BrokerSettings) -> Result<rustls::ClientConfig, LinkError> {
    use rustls::pki_types::pem::PemObject;
    use rustls::pki_types::{CertificateDer, PrivateKeyDer};
    let mut roots = rustls::RootCertStore::empty();
    match &b.ca_file {
        Some(ca) => {
            let certs = CertificateDer::pem_file_iter(ca)
                .map_err(pem_problem(ca, "CA file"))?
                .collect::<Result<Vec<_>, _>>()
                .map_err(pem_problem(ca, "CA file"))?;
            if certs.is_empty() {
                return Err(LinkError::Options(format!(
                    "{}: CA file holds no PEM certificate",
                    ca.display()
                )));
            }
            for cert in certs {
                roots.add(cert).map_err(|e| {
                    LinkError::Options(format!("{}: CA certificate refused: {e}", ca.display()))
                })?;
            }
        }
        None => {
            let found = rustls_native_certs::load_native_certs();
            for cert in found.certs {
                // A platform certificate rustls cannot use is left out, as a browser would.
                let _ = roots.add(cert);
            }
            if roots.is_empty() {
                return Err(LinkError::Options(
                    "mqtts:// without broker.ca_file and no usable platform CA certificates; set broker.ca_file".into(),
                ));
            }
        }
    }
    let provider = Arc::new(rustls::crypto::ring::default_provider());
    let builder = rustls::ClientConfig::builder_with_provider(provider)
        .with_safe_default_protocol_versions()
        .map_err(|e| LinkError::Options(format!("TLS: {e}")))?
        .with_root_certificates(roots);
    match (&b.client_cert_file, &b.client_key_file) {
        (Some(cert), Some(key)) => {
            let chain = CertificateDer::pem_file_iter(cert)
                .map_err(pem_problem(cert, "client certificate"))?
                .collect::<Result<Vec<_>, _>>()
                .map_err(pem_problem(cert, "client certificate"))?;
            let key_der =
                PrivateKeyDer::from_pem_file(key).map_err(pem_problem(key, "client key"))?;
            builder.with_client_auth_cert(chain, key_der).map_err(|e| {
                LinkError::Options(format!(
                    "{} and {}: client certificate and key refused: {e}",
                    cert.display(),
                    key.display()
                ))
            })
        }
        _ => Ok(builder.with_no_client_auth()),
    }
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

/// Connection state and reconnect backoff of one link.
pub(super) struct Connection {
    /// `results` or `input`, for the log.
    what: &'static str,
    broker: String,
    min: Duration,
    max: Duration,
    since: Option<Instant>,
    ever: bool,
    failures: u32,
    jitter: Jitter,
    /// The configured user name, for the refusal message.
    user: Option<String>,
}

impl Connection {
    pub(super) fn new(what: &'static str, b: &BrokerSettings) -> Self {
        Self {
            what,
            broker: format!("{}:{}", b.host, b.port),
            min: b.reconnect_min,
            max: b.reconnect_max,
            since: None,
            ever: false,
            failures: 0,
            jitter: Jitter((now_ms() as u64).wrapping_add(what.len() as u64) | 1),
            user: b.username.clone(),
        }
    }

    /// The configured user name (for a refusal's message).
    pub(super) fn user(&self) -> Option<&str> {
        self.user.as_deref()
    }

    pub(super) fn up(&mut self, session_present: bool) {
        self.since = Some(Instant::now());
        self.ever = true;
        info!(
            session_present,
            "connected to broker {} ({} connection)", self.broker, self.what
        );
    }

    /// The connection failed or could not be made: logs it and returns the delay before
    /// the next attempt ("equal jitter": half fixed, half random, growing exponentially).
    /// A broker that refuses the login or the client id will not change its mind in
    /// milliseconds: those wait the longest delay (`reconnect_max`) at once and say
    /// what to fix.
    pub(super) fn lost(&mut self, e: &rumqttc::ConnectionError) -> Duration {
        let fix = refusal(e, self.user.as_deref());
        self.lost_with(e, fix)
    }

    /// [`Connection::lost`] for any error, with what to fix when the broker refused the
    /// connection (then the longest delay at once).
    pub(super) fn lost_with(&mut self, e: &dyn std::fmt::Display, fix: Option<String>) -> Duration {
        let was_up = self.since.take();
        if was_up.is_some_and(|t| t.elapsed() >= STABLE) {
            self.failures = 0;
        }
        self.failures = self.failures.saturating_add(1);
        let (what, broker, attempt) = (self.what, &self.broker, self.failures);
        if let Some(fix) = fix {
            let delay = self.max.mul_f64(1.0 + 0.1 * self.jitter.next_unit());
            let retry = format!("{:.1} s", delay.as_secs_f64());
            if attempt == 1 {
                error!(error = %e, retry_in = %retry, "broker {broker} {fix} ({what} connection); retrying every broker.reconnect_max");
            } else {
                warn!(error = %e, retry_in = %retry, attempt, "broker {broker} {fix} ({what} connection)");
            }
            return delay;
        }
        let base = self.min.as_secs_f64() * 2f64.powi(self.failures.min(30) as i32 - 1);
        let cap = base.min(self.max.as_secs_f64());
        let delay = Duration::from_secs_f64(cap * (0.5 + 0.5 * self.jitter.next_unit()));
        let retry = format!("{:.1} s", delay.as_secs_f64());
        match was_up {
            Some(t) => {
                warn!(error = %e, retry_in = %retry, "{what} connection to broker {broker} lost after {}", up_for(t.elapsed()))
            }
            None if self.ever => {
                warn!(error = %e, retry_in = %retry, attempt, "could not reconnect the {what} connection to broker {broker}")
            }
            None => {
                warn!(error = %e, retry_in = %retry, attempt, "could not connect to broker {broker} ({what} connection, never connected since start)")
            }
        }
        delay
    }
}

/// What to fix when the broker refused the connection for a reason that retrying soon
/// will not change (MQTT 3.1.1 §3.2.2.3 return codes 1, 2, 4, 5); `None` otherwise
/// (3, server unavailable, and every network error take the normal backoff).
fn refusal(e: &rumqttc::ConnectionError, user: Option<&str>) -> Option<String> {
    use rumqttc::ConnectReturnCode as Code;
    let rumqttc::ConnectionError::ConnectionRefused(code) = e else {
        return None;
    };
    let code = match code {
        Code::RefusedProtocolVersion => 1,
        Code::BadClientId => 2,
        Code::ServiceUnavailable => 3,
        Code::BadUserNamePassword => 4,
        Code::NotAuthorized => 5,
        Code::Success => 0,
    };
    refusal_for_code(code, user)
}

/// What to fix for a CONNACK return code (MQTT 3.1.1 §3.2.2.3): `None` for 0 and 3
/// (accepted; server unavailable, which takes the normal backoff). Shared by both
/// result link clients and the input link, so the engineer reads the same words.
pub(super) fn refusal_for_code(code: u8, user: Option<&str>) -> Option<String> {
    let login = match user {
        Some(u) => format!("user {u:?}"),
        None => "no user name (anonymous)".to_string(),
    };
    match code {
        4 | 5 => Some(format!(
            "refused the user name or password, {login}: check broker.username and \
             broker.password_file or password_env against the broker's password file"
        )),
        2 => Some(
            "refused the client id: check broker.client_id (1 to 23 letters and digits for MQTT 3.1.1, unique on the broker)"
                .to_string(),
        ),
        1 => Some(
            "refused MQTT 3.1.1: check the broker's listener (protocol) settings".to_string(),
        ),
        _ => None,
    }
}

/// Asks for a clean disconnect and polls briefly until it is written.
pub(super) async fn disconnect(client: &AsyncClient, eventloop: &mut EventLoop) {
    let _ = client.try_disconnect();
    let until = Instant::now() + Duration::from_secs(1);
    while Instant::now() < until {
        match tokio::time::timeout(Duration::from_millis(200), eventloop.poll()).await {
            Ok(Ok(Event::Outgoing(Out::Disconnect))) | Ok(Err(_)) => break,
            _ => {}
        }
    }
}

/// The input link (see the module docs).
pub struct InputLink {
    pub broker: BrokerSettings,
    pub topics: Vec<String>,
    pub clock: Clock,
    /// Subscriptions changed by a configuration reload.
    pub changes: mpsc::Receiver<TopicChange>,
}

/// Topics to subscribe to and to leave (a configuration reload moved an input).
#[derive(Debug, Default)]
pub struct TopicChange {
    pub subscribe: Vec<String>,
    pub unsubscribe: Vec<String>,
}

impl InputLink {
    /// Subscribes on every connection and hands messages to `input` until `stop_input`;
    /// then drops `input` (the evaluator finishes what it has) and disconnects.
    pub async fn run(
        self,
        client: AsyncClient,
        mut eventloop: EventLoop,
        input: mpsc::Sender<RawInput>,
        metrics: Arc<Metrics>,
        stop_input: CancellationToken,
    ) {
        let mut conn = Connection::new("input", &self.broker);
        let mut this = self;
        let mut changes_open = true;
        // Topics left by a reload while the connection was down: a persistent session at
        // the broker still holds them, so they are unsubscribed at the next connection.
        let mut leave: Vec<String> = Vec::new();
        // SUBSCRIBE requests of this connection not yet acknowledged; readiness waits
        // for them (an input published before its SUBACK may never arrive).
        let mut awaiting: usize = 0;
        loop {
            tokio::select! {
                // Poll only while the evaluator can take a message: otherwise the messages
                // wait at the broker (TCP pushes back), not in this process.
                ev = eventloop.poll(), if input.capacity() > 0 => match ev {
                    Ok(Event::Incoming(Incoming::ConnAck(ack))) => {
                        metrics.input_connected.store(true, Relaxed);
                        metrics.input_subscribed.store(false, Relaxed);
                        conn.up(ack.session_present);
                        awaiting = 0;
                        // Subscribe on every connection: a broker may claim a session it
                        // does not have (or lost), and subscribing again is harmless
                        // (retained repeats are refused as duplicates by the monitor).
                        for t in &this.topics {
                            match client.try_subscribe(t.clone(), QoS::AtLeastOnce) {
                                Ok(()) => awaiting += 1,
                                Err(e) => warn!(topic = %t, error = %e, "subscribe request not queued"),
                            }
                        }
                        metrics.input_subscribed.store(awaiting == 0, Relaxed);
                        for t in leave.drain(..).filter(|t| !this.topics.contains(t)) {
                            if let Err(e) = client.try_unsubscribe(t.clone()) {
                                warn!(topic = %t, error = %e, "unsubscribe request not queued");
                            }
                        }
                    }
                    Ok(Event::Incoming(Incoming::Publish(p))) if p.payload.len() > this.broker.max_packet_bytes => {
                        metrics.messages_in.fetch_add(1, Relaxed);
                        let n = metrics.oversized.fetch_add(1, Relaxed) + 1;
                        // One line for the first and then every 100th: a retained
                        // oversized message comes back on every reconnect.
                        if n == 1 || n.is_multiple_of(100) {
                            warn!(topic = %crate::wire::input::echo(&p.topic), bytes = p.payload.len(), limit = this.broker.max_packet_bytes, refused_so_far = n, "input message over broker.max_packet_bytes refused");
                        }
                    }
                    Ok(Event::Incoming(Incoming::Publish(p))) => {
                        metrics.messages_in.fetch_add(1, Relaxed);
                        let raw = RawInput { topic: p.topic, payload: p.payload.to_vec(), arrival_ms: (this.clock)() };
                        match input.try_send(raw) {
                            Ok(()) => {}
                            // The evaluator is gone (shutdown).
                            Err(mpsc::error::TrySendError::Closed(_)) => break,
                            // Not reached: polling waits for capacity and this task is the only sender.
                            Err(mpsc::error::TrySendError::Full(_)) => warn!("input queue full; message dropped"),
                        }
                    }
                    Ok(Event::Incoming(Incoming::SubAck(s))) => {
                        if s.return_codes.iter().any(|c| matches!(c, rumqttc::SubscribeReasonCode::Failure)) {
                            warn!("the broker refused a subscription (check its ACL)");
                        }
                        awaiting = awaiting.saturating_sub(1);
                        if awaiting == 0 {
                            metrics.input_subscribed.store(true, Relaxed);
                        }
                    }
                    Ok(_) => {}
                    Err(e) => {
                        metrics.input_connected.store(false, Relaxed);
                        metrics.input_subscribed.store(false, Relaxed);
                        metrics.input_reconnects.fetch_add(1, Relaxed);
                        let delay = conn.lost(&e);
                        tokio::select! {
                            _ = tokio::time::sleep(delay) => {}
                            _ = stop_input.cancelled() => break,
                        }
                    }
                },
                // Woken when the evaluator has made room (the permit goes back at once).
                permit = input.reserve(), if input.capacity() == 0 => {
                    if permit.is_err() {
                        break; // the evaluator is gone (shutdown)
                    }
                }
                change = this.changes.recv(), if changes_open => match change {
                    None => changes_open = false,
                    Some(c) => {
                        let up = conn.since.is_some() && metrics.input_connected.load(Relaxed);
                        if up {
                            for t in &c.subscribe {
                                match client.try_subscribe(t.clone(), QoS::AtLeastOnce) {
                                    Ok(()) => {
                                        awaiting += 1;
                                        metrics.input_subscribed.store(false, Relaxed);
                                    }
                                    Err(e) => warn!(topic = %t, error = %e, "subscribe request not queued"),
                                }
                            }
                        }
                        for t in &c.unsubscribe {
                            if !up {
                                leave.push(t.clone());
                            } else if let Err(e) = client.try_unsubscribe(t.clone()) {
                                warn!(topic = %t, error = %e, "unsubscribe request not queued");
                            }
                        }
                        this.topics.retain(|t| !c.unsubscribe.contains(t));
                        this.topics.extend(c.subscribe);
                        info!(topics = this.topics.len(), "input subscriptions changed by the reload");
                    }
                },
                _ = stop_input.cancelled() => break,
            }
        }
        // The evaluator finishes what it has, then the journal says Drained to the
        // result link.
        drop(input);
        if conn.since.is_some() {
            disconnect(&client, &mut eventloop).await;
        }
        metrics.input_connected.store(false, Relaxed);
        metrics.input_subscribed.store(false, Relaxed);
    }
}

#[cfg(test)]
mod tests {
    use super::output_client_id;

    #[test]
    fn output_client_ids_stay_within_23_bytes_and_apart() {
        // MQTT 3.1.1 spec 3.1.3.1: servers must accept 1 to 23 bytes.
        assert_eq!(output_client_id("eqwatch-baw1"), "eqwatch-baw1-o");
        let a = output_client_id("eqwatch-brackwater-tr1");
        let b = output_client_id("eqwatch-brackwater-tr2");
        assert!(a.len() <= 23 && b.len() <= 23, "{a} {b}");
        assert_ne!(a, b);
        assert_ne!(a, "eqwatch-brackwater-tr1");
        // Multi-byte characters are cut at a character boundary.
        let c = output_client_id("eqwatch-ééééééééééé");
        assert!(c.len() <= 23, "{c}");
    }
}
