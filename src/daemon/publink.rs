//! The result link over our own MQTT 3.1.1 client ([`super::mqtt311`]): the same duties
//! as described in [`super::mqtt`] (records from the [`Outbox`] with QoS 1, the
//! acknowledged watermark to the journal, `online` retained on every connection and
//! `offline` as last will and at a clean shutdown, backoff between attempts), written
//! so that a flood costs few system calls.
//!
//! One task, one loop. On every wake-up it handles every packet the socket has
//! delivered (PUBACKs move the watermark and free the window), takes every record the
//! journal has handed over, encodes every record the in-flight window allows into one
//! buffer and writes that buffer with one write (continued if the kernel takes only
//! part of it). A general-purpose client writes and flushes once per PUBLISH; here a
//! burst of results costs one `write` and one wake-up.
//!
//! Keepalive (§3.1.2.10): a PINGREQ when nothing was sent for the keepalive; no
//! PINGRESP within another keepalive and the connection counts as lost. Packet ids run
//! 1..=65535 and skip ids still in flight (§2.3.1). A resumed session (CONNACK session
//! present) gets the unacknowledged PUBLISHes again, DUP set, in their original order
//! (§4.4); a new session hands them back to the outbox, which sends them again in
//! sequence order.
//!
//! Must not: block, or await anything but the socket, the journal's channel and timers.

use std::collections::VecDeque;
use std::future::Future;
use std::pin::Pin;
use std::sync::Arc;
use std::sync::atomic::Ordering::Relaxed;
use std::task::Poll;
use std::time::{Duration, Instant};

use tokio::io::{AsyncRead, AsyncReadExt, AsyncWrite, AsyncWriteExt, ReadBuf};
use tokio::net::TcpStream;
use tokio::sync::{Notify, mpsc};
use tokio_util::sync::CancellationToken;
use tracing::{debug, info, warn};

use super::mqtt::{
    Connection, LATE_MS, LinkError, OUTBOX_CAPACITY, copy_results, output_client_id,
    refusal_for_code, tls_config,
};
use super::mqtt311::{self as wire, ConnectReturn, DecodeError, EncodeError, Packet, QoS};
use super::outbox::{Offer, Outbox};
use super::{Clock, JournalCmd, ToLink, UNACKED_RESUME};
use crate::config::{BrokerSettings, MqttProtocol};
use crate::pipeline::metrics::Metrics;
use crate::wire::result::delivery_parts;

/// Bytes read from the socket per read call at most: the broker sends this link
/// PUBACKs (4 bytes each, §3.4) and PINGRESPs, so a window of 2,000 fits in one read.
const READ_CHUNK: usize = 8 * 1024;
/// How often the loop looks at the keepalive, the journal read-back and the shutdown
/// deadline when nothing else wakes it (keepalive is whole seconds, at least 5).
const TICK: Duration = Duration::from_millis(250);
/// How often at most the journal thread is told the watermark by a message of its own
/// (the journal writes its cursor once per `fsync_interval` anyway, and a watermark told
/// late only means a few more records resent after a crash, never one lost).
const TELL_JOURNAL: Duration = Duration::from_millis(200);

/// Why a connection attempt failed or a connection ended.
#[derive(Debug, thiserror::Error)]
enum Lost {
    #[error("TCP connect: {0}")]
    Tcp(std::io::Error),
    #[error("TLS handshake: {0}")]
    Tls(std::io::Error),
    #[error("no CONNACK within broker.connect_timeout ({0} s)")]
    ConnectTimeout(u64),
    #[error("the broker answered the CONNECT with {0:?}")]
    Refused(ConnectReturn),
    #[error("the broker's first packet was not a CONNACK")]
    NoConnAck,
    #[error("no PINGRESP within broker.keep_alive ({0} s) of a PINGREQ")]
    NoPingResp(u64),
    #[error("a write to the broker took longer than broker.connect_timeout ({0} s)")]
    WriteTimeout(u64),
    #[error("socket: {0}")]
    Io(std::io::Error),
    #[error("the broker closed the connection")]
    Closed,
    #[error("malformed packet from the broker: {0}")]
    Protocol(DecodeError),
    #[error("a record cannot be sent: {0}")]
    Encode(EncodeError),
}

/// A byte stream to the broker: plain TCP or TLS over it.
trait Io: AsyncRead + AsyncWrite + Unpin + Send {}
impl<T: AsyncRead + AsyncWrite + Unpin + Send> Io for T {}

/// How to reach the broker: address, TLS and the CONNECT (with the last will).
pub struct Options {
    host: String,
    port: u16,
    tls: Option<tokio_rustls::TlsConnector>,
    connect: wire::Connect,
    connect_timeout: Duration,
    keep_alive: Duration,
    max_incoming: usize,
}

impl Options {
    /// The result link's options from validated settings: client id
    /// [`output_client_id`], QoS 1 retained last will `will` on `status_topic`, the
    /// session kept when `broker.session_expiry` is above zero.
    pub fn new(b: &BrokerSettings, status_topic: &str, will: &str) -> Result<Self, LinkError> {
        if b.protocol == MqttProtocol::V5 {
            return Err(LinkError::Options(
                "MQTT 5 is accepted in the configuration but this build speaks MQTT 3.1.1 only; set broker.protocol = \"3.1.1\"".into(),
            ));
        }
        let tls = if b.tls {
            Some(tokio_rustls::TlsConnector::from(Arc::new(tls_config(b)?)))
        } else {
            None
        };
        let connect = wire::Connect {
            client_id: output_client_id(&b.client_id),
            // Validated as whole seconds from 5 to 65535.
            keep_alive_s: u16::try_from(b.keep_alive.as_secs()).unwrap_or(u16::MAX),
            clean_session: b.session_expiry.is_zero(),
            will: Some(wire::Will {
                topic: status_topic.to_string(),
                message: will.as_bytes().to_vec(),
                qos: QoS::AtLeastOnce,
                retain: true,
            }),
            username: b.username.clone(),
            password: b
                .username
                .as_ref()
                .map(|_| b.password.clone().unwrap_or_default().into_bytes()),
        };
        // Refuse at start what could never be encoded (a will over 65535 bytes).
        wire::encode_connect(&mut Vec::new(), &connect)
            .map_err(|e| LinkError::Options(format!("CONNECT: {e}")))?;
        Ok(Self {
            host: b.host.clone(),
            port: b.port,
            tls,
            connect,
            connect_timeout: b.connect_timeout,
            keep_alive: b.keep_alive,
            max_incoming: b.max_packet_bytes,
        })
    }
}

/// The result link (see the module docs).
pub struct ResultLink {
    pub broker: BrokerSettings,
    pub options: Options,
    pub status_topic: String,
    pub online_payload: String,
    pub offline_payload: String,
    pub published_at_start: u64,
    pub journal_last_at_start: u64,
    pub clock: Clock,
    /// Woken whenever the acknowledged watermark moves (the evaluator waits on it when
    /// too many results are unacknowledged).
    pub acked: Arc<Notify>,
    /// Copies of results for the Sparkplug edge node (`[sparkplug] publish`).
    pub copies: Option<mpsc::Sender<super::ResultCopy>>,
}

/// One PUBLISH waiting for its PUBACK, kept encoded for a resend.
struct InFlight {
    pkid: u16,
    /// Journal sequence; 0 for a status message (not the outbox's).
    seq: u64,
    bytes: Vec<u8>,
}

/// The client side of the MQTT session: what is in flight and the packet ids in use.
struct Session {
    in_flight: VecDeque<InFlight>,
    used: Box<[u64; 1024]>,
    next_id: u16,
}

impl Session {
    fn new() -> Self {
        Self {
            in_flight: VecDeque::new(),
            used: Box::new([0; 1024]),
            next_id: 1,
        }
    }

    fn is_used(&self, id: u16) -> bool {
        self.used[usize::from(id >> 6)] & (1 << (id & 63)) != 0
    }

    fn set_used(&mut self, id: u16, on: bool) {
        let (w, bit) = (usize::from(id >> 6), 1u64 << (id & 63));
        if on {
            self.used[w] |= bit;
        } else {
            self.used[w] &= !bit;
        }
    }

    /// The next free packet id, 1..=65535 (§2.3.1: non-zero, not in use); `None` when
    /// all 65535 are in flight.
    fn take_id(&mut self) -> Option<u16> {
        if self.in_flight.len() >= usize::from(u16::MAX) {
            return None;
        }
        loop {
            let id = self.next_id;
            self.next_id = if id == u16::MAX { 1 } else { id + 1 };
            if !self.is_used(id) {
                self.set_used(id, true);
                return Some(id);
            }
        }
    }

    /// Encodes a QoS 1 PUBLISH into `out` and keeps it until its PUBACK.
    fn publish(
        &mut self,
        out: &mut Vec<u8>,
        topic: &str,
        payload: &[&[u8]],
        retain: bool,
        seq: u64,
    ) -> Result<Option<u16>, EncodeError> {
        let Some(pkid) = self.take_id() else {
            return Ok(None);
        };
        let payload_len: usize = payload.iter().map(|p| p.len()).sum();
        let mut bytes = Vec::with_capacity(topic.len() + payload_len + 9);
        if let Err(e) = wire::encode_publish_parts(
            &mut bytes,
            topic,
            payload,
            QoS::AtLeastOnce,
            retain,
            false,
            pkid,
        ) {
            self.set_used(pkid, false);
            return Err(e);
        }
        out.extend_from_slice(&bytes);
        self.in_flight.push_back(InFlight { pkid, seq, bytes });
        Ok(Some(pkid))
    }

    /// The PUBACK for `pkid`: the sequence it carried (0 for a status message), or
    /// `None` for an id not in flight.
    fn acked(&mut self, pkid: u16) -> Option<u64> {
        // Acknowledgements come in order as a rule: the front first.
        let i = self.in_flight.iter().position(|f| f.pkid == pkid)?;
        let f = self.in_flight.remove(i)?;
        self.set_used(pkid, false);
        Some(f.seq)
    }

    /// Appends every unacknowledged PUBLISH, DUP set, in the order first sent (§4.4,
    /// §3.3.1.1).
    fn resend(&mut self, out: &mut Vec<u8>) {
        for f in &mut self.in_flight {
            wire::set_dup(&mut f.bytes);
            out.extend_from_slice(&f.bytes);
        }
    }

    fn clear(&mut self) {
        self.in_flight.clear();
        self.used.fill(0);
    }
}

/// An open connection and its timers.
struct Up {
    io: Box<dyn Io>,
    /// Bytes read and not yet decoded.
    rbuf: Vec<u8>,
    /// Where [`read_now`] reads to (zeroed once per connection).
    chunk: Vec<u8>,
    last_sent: Instant,
    ping_sent: Option<Instant>,
}

/// What the loop around the connection decided.
enum Step {
    /// Shutdown: everything delivered, or the flush deadline passed.
    Finish,
    Lost(Lost),
}

/// The state every phase (backoff, connecting, connected) keeps serving: the outbox,
/// the journal's messages and the shutdown deadline.
struct Duty {
    outbox: Outbox,
    drained: bool,
    stop_at: Option<Instant>,
    flush_deadline: Duration,
    journal: mpsc::Sender<JournalCmd>,
    metrics: Arc<Metrics>,
    copies: Option<mpsc::Sender<super::ResultCopy>>,
    journal_last_at_start: u64,
    published_at_start: u64,
    acked: Arc<Notify>,
    /// When the journal was last told the watermark, and whether it has moved since.
    told_journal: Instant,
    untold: bool,
}

impl Duty {
    fn on_journal(&mut self, msg: Option<ToLink>) {
        match msg {
            Some(ToLink::Records(records)) => {
                if let Some(tx) = &self.copies {
                    copy_results(tx, &records, self.journal_last_at_start, &self.metrics);
                }
                for r in records {
                    if self.outbox.offer(r) == Offer::Deferred {
                        debug!("record deferred to a journal read");
                    }
                }
            }
            Some(ToLink::ReadDone) => self.outbox.read_done(),
            Some(ToLink::JournalAt(last)) => self.outbox.journal_at(last),
            Some(ToLink::Drained) | None => self.drained = true,
        }
    }

    /// Takes every message the journal has ready, without waiting.
    fn drain_journal(&mut self, from_journal: &mut mpsc::Receiver<ToLink>) {
        while !self.drained {
            match from_journal.try_recv() {
                Ok(msg) => self.on_journal(Some(msg)),
                Err(mpsc::error::TryRecvError::Empty) => break,
                Err(mpsc::error::TryRecvError::Disconnected) => self.on_journal(None),
            }
        }
    }

    /// Asks for journal reads, notes the shutdown; `true` when the link should stop.
    fn turn(&mut self, stop_input: &CancellationToken) -> bool {
        if let Some(after) = self.outbox.wants_read() {
            let read = JournalCmd::ReadAfter {
                after,
                max: OUTBOX_CAPACITY / 2,
            };
            if self.journal.try_send(read).is_err() {
                // The journal is busy: ask again on a later turn.
                self.outbox.read_done();
            }
        }
        self.metrics
            .journal_published_seq
            .store(self.outbox.watermark(), Relaxed);
        self.tell_journal();
        if stop_input.is_cancelled() && self.stop_at.is_none() {
            self.stop_at = Some(Instant::now() + self.flush_deadline);
            info!("shutdown: input stopped, delivering what is journaled");
        }
        if let Some(at) = self.stop_at {
            let flushed = self.drained && self.outbox.queued() == 0 && self.outbox.in_flight() == 0;
            if flushed || Instant::now() >= at {
                if !flushed {
                    warn!(
                        backlog = self.outbox.backlog(),
                        "shutdown deadline reached; the journal keeps the rest for the next start"
                    );
                }
                return true;
            }
        }
        false
    }

    /// The broker acknowledged a journal record's PUBLISH: `true` when the watermark
    /// moved (then [`Duty::watermark_moved`] once for a whole read).
    fn on_ack(&mut self, pkid: u16) -> bool {
        self.outbox.on_ack(pkid).is_some()
    }

    /// Tells the metrics, the evaluator and the journal where the watermark is now:
    /// once per read however many PUBACKs it held (one wake-up of the journal thread,
    /// not one per result).
    fn watermark_moved(&mut self) {
        let w = self.outbox.watermark();
        self.metrics
            .published
            .store(w.saturating_sub(self.published_at_start), Relaxed);
        self.metrics.journal_published_seq.store(w, Relaxed);
        if self.metrics.backlog() <= UNACKED_RESUME {
            self.acked.notify_one();
        }
        self.untold = true;
        self.tell_journal();
    }

    /// Tells the journal thread the watermark at most once per [`TELL_JOURNAL`] (each
    /// message wakes that thread; in between it reads the watermark from the metrics
    /// whenever it wakes for records). A watermark left untold is told on a later turn
    /// (the loop turns at least every [`TICK`]).
    fn tell_journal(&mut self) {
        if !self.untold || self.told_journal.elapsed() < TELL_JOURNAL {
            return;
        }
        // A later acknowledgement carries a higher watermark, so a busy journal may
        // skip this one.
        let sent = self.journal.try_send(JournalCmd::Published {
            seq: self.outbox.watermark(),
            force: false,
        });
        if sent.is_ok() {
            self.untold = false;
            self.told_journal = Instant::now();
        }
    }
}

/// Reads what the socket has now, without waiting: `Ok(true)` when bytes came.
fn read_now(link: &mut Up) -> Result<bool, Lost> {
    let mut cx = std::task::Context::from_waker(std::task::Waker::noop());
    let mut rb = ReadBuf::new(&mut link.chunk);
    match Pin::new(&mut *link.io).poll_read(&mut cx, &mut rb) {
        Poll::Ready(Ok(())) => {
            let got = rb.filled();
            if got.is_empty() {
                return Err(Lost::Closed);
            }
            link.rbuf.extend_from_slice(got);
            Ok(true)
        }
        Poll::Ready(Err(e)) => Err(Lost::Io(e)),
        Poll::Pending => Ok(false),
    }
}

/// Writes what the socket takes now, without waiting: the bytes written and whether
/// the stream then flushed (TLS may hold records back).
fn write_now(io: &mut Box<dyn Io>, bytes: &[u8]) -> std::io::Result<(usize, bool)> {
    let mut cx = std::task::Context::from_waker(std::task::Waker::noop());
    let mut written = 0;
    while written < bytes.len() {
        match Pin::new(&mut **io).poll_write(&mut cx, &bytes[written..]) {
            Poll::Ready(Ok(0)) => {
                return Err(std::io::Error::from(std::io::ErrorKind::WriteZero));
            }
            Poll::Ready(Ok(n)) => written += n,
            Poll::Ready(Err(e)) => return Err(e),
            Poll::Pending => return Ok((written, false)),
        }
    }
    match Pin::new(&mut **io).poll_flush(&mut cx) {
        Poll::Ready(Ok(())) => Ok((written, true)),
        Poll::Ready(Err(e)) => Err(e),
        Poll::Pending => Ok((written, false)),
    }
}

impl ResultLink {
    /// Runs until shutdown: after `stop_input` the link delivers everything the journal
    /// still sends (until [`ToLink::Drained`]), says `offline` and disconnects.
    /// `flush_deadline` bounds the flush after `stop_input`.
    pub async fn run(
        self,
        mut from_journal: mpsc::Receiver<ToLink>,
        journal: mpsc::Sender<JournalCmd>,
        metrics: Arc<Metrics>,
        stop_input: CancellationToken,
        flush_deadline: Duration,
    ) {
        let mut outbox = Outbox::new(self.published_at_start, OUTBOX_CAPACITY);
        outbox.journal_at(self.journal_last_at_start);
        let mut duty = Duty {
            outbox,
            drained: false,
            stop_at: None,
            flush_deadline,
            journal,
            metrics: metrics.clone(),
            copies: self.copies.clone(),
            journal_last_at_start: self.journal_last_at_start,
            published_at_start: self.published_at_start,
            acked: self.acked.clone(),
            told_journal: Instant::now(),
            untold: false,
        };
        let mut conn = Connection::new("results", &self.broker);
        let mut session = Session::new();
        let mut up: Option<Up> = None;
        let mut retry_at: Option<Instant> = None;
        loop {
            let Some(link) = up.as_mut() else {
                // Down: wait out the backoff, then connect, serving the journal meanwhile.
                if let Some(at) = retry_at.take() {
                    let sleep = tokio::time::sleep_until(at.into());
                    if self
                        .serve_while(&mut duty, &mut from_journal, &stop_input, sleep)
                        .await
                        .is_none()
                    {
                        break;
                    }
                }
                let attempt = connect(&self.options);
                match self
                    .serve_while(&mut duty, &mut from_journal, &stop_input, attempt)
                    .await
                {
                    None => break,
                    Some(Ok((link, session_present))) => {
                        up = Some(link);
                        metrics.connected.store(true, Relaxed);
                        conn.up(session_present);
                        let mut first = Vec::new();
                        if session_present {
                            session.resend(&mut first);
                        } else {
                            session.clear();
                            duty.outbox.on_new_session();
                        }
                        if let Err(e) = session.publish(
                            &mut first,
                            &self.status_topic,
                            &[self.online_payload.as_bytes()],
                            true,
                            0,
                        ) {
                            warn!(error = %e, "status message not sent");
                        }
                        // The evaluator may wait for room that a new connection makes.
                        self.acked.notify_one();
                        if let Some(link) = up.as_mut()
                            && let Err(e) = self.write(link, &first).await
                        {
                            up = None;
                            retry_at = Some(self.lost(&mut conn, &metrics, &e));
                        }
                    }
                    Some(Err(e)) => retry_at = Some(self.lost(&mut conn, &metrics, &e)),
                }
                continue;
            };
            match self
                .serve_up(
                    link,
                    &mut session,
                    &mut duty,
                    &mut from_journal,
                    &stop_input,
                )
                .await
            {
                Step::Finish => break,
                Step::Lost(e) => {
                    up = None;
                    retry_at = Some(self.lost(&mut conn, &metrics, &e));
                }
            }
        }
        // Stop taking records first, so a journal thread waiting on a full queue is
        // released (anything it still had is on disk and goes out after the next start).
        drop(from_journal);
        let _ = duty
            .journal
            .send(JournalCmd::Published {
                seq: duty.outbox.watermark(),
                force: true,
            })
            .await;
        if let Some(mut link) = up {
            self.say_offline(&mut link, &mut session).await;
        }
        metrics.connected.store(false, Relaxed);
    }

    /// Counts a lost connection and returns when to try again.
    fn lost(&self, conn: &mut Connection, metrics: &Metrics, e: &Lost) -> Instant {
        metrics.connected.store(false, Relaxed);
        metrics.reconnects.fetch_add(1, Relaxed);
        self.acked.notify_one();
        let fix = match e {
            Lost::Refused(code) => refusal_for_code(*code as u8, conn.user()),
            Lost::Encode(_) => {
                metrics.publish_failures.fetch_add(1, Relaxed);
                None
            }
            _ => None,
        };
        Instant::now() + conn.lost_with(e, fix)
    }

    /// Runs `fut` while serving the journal and the shutdown; `None` when the link
    /// should stop (shutdown and flushed, or the deadline passed).
    async fn serve_while<F: Future>(
        &self,
        duty: &mut Duty,
        from_journal: &mut mpsc::Receiver<ToLink>,
        stop_input: &CancellationToken,
        fut: F,
    ) -> Option<F::Output> {
        tokio::pin!(fut);
        loop {
            if duty.turn(stop_input) {
                return None;
            }
            let deadline = duty
                .stop_at
                .map_or(Instant::now() + TICK, |at| at.min(Instant::now() + TICK));
            tokio::select! {
                out = &mut fut => return Some(out),
                msg = from_journal.recv(), if !duty.drained => duty.on_journal(msg),
                _ = tokio::time::sleep_until(deadline.into()) => {}
                _ = stop_input.cancelled(), if duty.stop_at.is_none() => {}
            }
        }
    }

    /// Writes `bytes` whole (the kernel may take them in parts), within the write limit.
    /// The common case, a socket with room, finishes at once with no timer armed.
    async fn write(&self, link: &mut Up, bytes: &[u8]) -> Result<(), Lost> {
        if bytes.is_empty() {
            return Ok(());
        }
        let (written, flushed) = write_now(&mut link.io, bytes).map_err(Lost::Io)?;
        if written == bytes.len() && flushed {
            link.last_sent = Instant::now();
            return Ok(());
        }
        let rest = &bytes[written..];
        let limit = self.options.connect_timeout;
        let io = &mut link.io;
        let done = tokio::time::timeout(limit, async {
            io.write_all(rest).await?;
            io.flush().await
        })
        .await;
        match done {
            Ok(Ok(())) => {
                link.last_sent = Instant::now();
                Ok(())
            }
            Ok(Err(e)) => Err(Lost::Io(e)),
            Err(_) => Err(Lost::WriteTimeout(limit.as_secs())),
        }
    }

    /// The connected loop (see the module docs).
    async fn serve_up(
        &self,
        link: &mut Up,
        session: &mut Session,
        duty: &mut Duty,
        from_journal: &mut mpsc::Receiver<ToLink>,
        stop_input: &CancellationToken,
    ) -> Step {
        let window = usize::from(self.broker.inflight.max(1));
        let keep_alive = self.options.keep_alive;
        // Grows to the largest batch once (a window of records), then is reused.
        let mut out: Vec<u8> = Vec::with_capacity(16 * 1024);
        // One timer for the connection, not one per turn.
        let mut tick = tokio::time::interval(TICK);
        tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Delay);
        loop {
            // 1. Everything the socket has: every PUBACK in it.
            match read_now(link) {
                Ok(_) => {}
                Err(e) => return Step::Lost(e),
            }
            if let Err(e) = self.handle_incoming(link, session, duty, &mut out) {
                return Step::Lost(e);
            }
            // 2. Everything the journal has handed over.
            duty.drain_journal(from_journal);
            if duty.turn(stop_input) {
                return Step::Finish;
            }
            // 3. Every record the window allows, into one buffer.
            while let Some(r) = duty.outbox.next(window) {
                let late = r.replayed || (self.clock)() - r.ts_ms > LATE_MS;
                let (head, rest) = delivery_parts(&r.payload, r.seq, late);
                let seq = r.seq;
                let body = [head.as_bytes(), rest.as_bytes()];
                match session.publish(&mut out, &r.topic, &body, r.retain, seq) {
                    Ok(Some(pkid)) => {
                        duty.outbox.handed_front();
                        duty.outbox.on_outgoing(pkid);
                    }
                    Ok(None) => break, // every packet id in flight
                    Err(e) => return Step::Lost(Lost::Encode(e)),
                }
            }
            // 4. Keepalive (§3.1.2.10).
            let now = Instant::now();
            if let Some(sent) = link.ping_sent {
                if now.duration_since(sent) >= keep_alive {
                    return Step::Lost(Lost::NoPingResp(keep_alive.as_secs()));
                }
            } else if out.is_empty() && now.duration_since(link.last_sent) >= keep_alive {
                let _ = wire::encode(&mut out, &Packet::PingReq);
                link.ping_sent = Some(now);
            }
            // 5. One write for all of it.
            if !out.is_empty() {
                if let Err(e) = self.write(link, &out).await {
                    return Step::Lost(e);
                }
                out.clear();
                continue;
            }
            // 6. Wait for the socket, the journal, the tick (keepalive, journal reads and
            // the shutdown deadline are looked at on it) or the shutdown.
            link.rbuf.reserve(READ_CHUNK);
            tokio::select! {
                n = link.io.read_buf(&mut link.rbuf) => match n {
                    Ok(0) => return Step::Lost(Lost::Closed),
                    Ok(_) => {}
                    Err(e) => return Step::Lost(Lost::Io(e)),
                },
                msg = from_journal.recv(), if !duty.drained => duty.on_journal(msg),
                _ = tick.tick() => {}
                _ = stop_input.cancelled(), if duty.stop_at.is_none() => {}
            }
        }
    }

    /// Handles every whole packet in the read buffer.
    fn handle_incoming(
        &self,
        link: &mut Up,
        session: &mut Session,
        duty: &mut Duty,
        out: &mut Vec<u8>,
    ) -> Result<(), Lost> {
        let mut at = 0;
        let mut moved = false;
        let result = loop {
            match wire::decode(&link.rbuf[at..], self.options.max_incoming) {
                Ok(None) => break Ok(()),
                Err(e) => break Err(Lost::Protocol(e)),
                Ok(Some((packet, used))) => {
                    at += used;
                    match packet {
                        Packet::PubAck(pkid) => {
                            if let Some(seq) = session.acked(pkid)
                                && seq != 0
                            {
                                moved |= duty.on_ack(pkid);
                            }
                        }
                        Packet::PingResp => link.ping_sent = None,
                        Packet::Publish(p) => {
                            // The result link subscribes to nothing; a stale session's
                            // message is acknowledged so the broker stops resending it.
                            debug!(topic = %p.topic, "unexpected message on the result link");
                            if p.qos == QoS::AtLeastOnce {
                                let _ = wire::encode(out, &Packet::PubAck(p.pkid));
                            }
                        }
                        Packet::Disconnect => break Err(Lost::Closed),
                        other => debug!(packet = ?other, "unexpected packet on the result link"),
                    }
                }
            }
        };
        link.rbuf.drain(..at);
        if moved {
            duty.watermark_moved();
        }
        result
    }

    /// Says `offline` (retained), waits briefly for its acknowledgement, disconnects.
    async fn say_offline(&self, link: &mut Up, session: &mut Session) {
        let mut out = Vec::new();
        let Ok(Some(pkid)) = session.publish(
            &mut out,
            &self.status_topic,
            &[self.offline_payload.as_bytes()],
            true,
            0,
        ) else {
            return;
        };
        if self.write(link, &out).await.is_ok() {
            let until = Instant::now() + Duration::from_secs(3);
            'wait: while Instant::now() < until {
                link.rbuf.reserve(READ_CHUNK);
                match tokio::time::timeout(
                    Duration::from_millis(200),
                    link.io.read_buf(&mut link.rbuf),
                )
                .await
                {
                    Ok(Ok(0)) | Ok(Err(_)) => break,
                    Ok(Ok(_)) | Err(_) => {}
                }
                let mut at = 0;
                while let Ok(Some((packet, used))) =
                    wire::decode(&link.rbuf[at..], self.options.max_incoming)
                {
                    at += used;
                    if packet == Packet::PubAck(pkid) {
                        break 'wait;
                    }
                }
                link.rbuf.drain(..at);
            }
        }
        // §3.14: DISCONNECT, then close (the broker then discards the will).
        let mut bye = Vec::new();
        let _ = wire::encode(&mut bye, &Packet::Disconnect);
        if self.write(link, &bye).await.is_ok() {
            let _ = tokio::time::timeout(Duration::from_secs(1), link.io.shutdown()).await;
        }
    }
}

/// TCP (no Nagle delay), TLS when configured, CONNECT and its CONNACK, all within
/// `broker.connect_timeout`: the open connection and whether the broker had a session.
async fn connect(o: &Options) -> Result<(Up, bool), Lost> {
    let limit = o.connect_timeout;
    match tokio::time::timeout(limit, connect_inner(o)).await {
        Ok(r) => r,
        Err(_) => Err(Lost::ConnectTimeout(limit.as_secs())),
    }
}

async fn connect_inner(o: &Options) -> Result<(Up, bool), Lost> {
    let tcp = TcpStream::connect((o.host.as_str(), o.port))
        .await
        .map_err(Lost::Tcp)?;
    tcp.set_nodelay(true).map_err(Lost::Tcp)?;
    let mut io: Box<dyn Io> = match &o.tls {
        None => Box::new(tcp),
        Some(tls) => {
            let name = rustls::pki_types::ServerName::try_from(o.host.clone())
                .map_err(|e| Lost::Tls(std::io::Error::new(std::io::ErrorKind::InvalidInput, e)))?;
            Box::new(tls.connect(name, tcp).await.map_err(Lost::Tls)?)
        }
    };
    let mut hello = Vec::new();
    wire::encode_connect(&mut hello, &o.connect).map_err(Lost::Encode)?;
    io.write_all(&hello).await.map_err(Lost::Io)?;
    io.flush().await.map_err(Lost::Io)?;
    let mut rbuf = Vec::with_capacity(READ_CHUNK);
    loop {
        match wire::decode(&rbuf, o.max_incoming).map_err(Lost::Protocol)? {
            None => {
                rbuf.reserve(READ_CHUNK);
                if io.read_buf(&mut rbuf).await.map_err(Lost::Io)? == 0 {
                    return Err(Lost::Closed);
                }
            }
            Some((Packet::ConnAck(ack), used)) => {
                if ack.code != ConnectReturn::Accepted {
                    return Err(Lost::Refused(ack.code));
                }
                rbuf.drain(..used);
                let up = Up {
                    io,
                    rbuf,
                    chunk: vec![0; READ_CHUNK],
                    last_sent: Instant::now(),
                    ping_sent: None,
                };
                // §3.2.2.2: session present is 0 whenever a clean session was asked for.
                return Ok((up, ack.session_present && !o.connect.clean_session));
            }
            // §3.2: the first packet from the server is a CONNACK.
            Some(_) => return Err(Lost::NoConnAck),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::Session;

    #[test]
    fn the_journal_is_told_the_watermark_at_most_once_per_period_and_never_left_untold() {
        use super::{Duty, Outbox, TELL_JOURNAL};
        use crate::daemon::JournalCmd;
        use crate::daemon::outbox::rec;
        use std::sync::Arc;
        use std::time::{Duration, Instant};
        let (tx, mut rx) = tokio::sync::mpsc::channel(16);
        let mut duty = Duty {
            outbox: Outbox::new(0, 64),
            drained: false,
            stop_at: None,
            flush_deadline: Duration::from_secs(1),
            journal: tx,
            metrics: Arc::new(crate::pipeline::metrics::Metrics::new(&["r1".to_string()])),
            copies: None,
            journal_last_at_start: 0,
            published_at_start: 0,
            acked: Arc::new(tokio::sync::Notify::new()),
            told_journal: Instant::now(),
            untold: false,
        };
        // Records 1..=3 handed to the broker as packets 1..=3.
        for seq in 1..=3u64 {
            duty.outbox.offer(rec(seq));
            assert!(duty.outbox.next(64).is_some());
            duty.outbox.handed_front();
            duty.outbox.on_outgoing(seq as u16);
        }
        let told = |rx: &mut tokio::sync::mpsc::Receiver<JournalCmd>| {
            let mut seqs = Vec::new();
            while let Ok(cmd) = rx.try_recv() {
                if let JournalCmd::Published { seq, .. } = cmd {
                    seqs.push(seq);
                }
            }
            seqs
        };
        // The period has passed: the first acknowledgement is told at once ...
        duty.told_journal = Instant::now() - TELL_JOURNAL;
        assert!(duty.on_ack(1));
        duty.watermark_moved();
        assert_eq!(told(&mut rx), [1]);
        // ... the next ones within the period are not (no wake-up each) ...
        assert!(duty.on_ack(2));
        duty.watermark_moved();
        assert!(duty.on_ack(3));
        duty.watermark_moved();
        assert_eq!(told(&mut rx), Vec::<u64>::new());
        // ... and once it has passed, a turn tells the latest watermark.
        duty.told_journal = Instant::now() - TELL_JOURNAL;
        let stop = tokio_util::sync::CancellationToken::new();
        assert!(!duty.turn(&stop));
        assert_eq!(told(&mut rx), [3]);
        // Nothing new: nothing told.
        duty.told_journal = Instant::now() - TELL_JOURNAL;
        assert!(!duty.turn(&stop));
        assert_eq!(told(&mut rx), Vec::<u64>::new());
    }

    #[test]
    fn packet_ids_skip_those_in_flight_and_wrap_past_zero() {
        // MQTT 3.1.1 §2.3.1: ids are non-zero and a new packet takes an id not in use.
        let mut s = Session::new();
        let mut out = Vec::new();
        for _ in 0..3 {
            s.publish(&mut out, "t", &[b"x"], false, 1).unwrap();
        }
        assert_eq!(
            s.in_flight.iter().map(|f| f.pkid).collect::<Vec<_>>(),
            [1, 2, 3]
        );
        assert_eq!(s.acked(2), Some(1));
        assert_eq!(s.acked(2), None, "an id acknowledged once");
        // Run the counter to the top: 65535 is used, then 0 is skipped, then 1 and 3
        // (still in flight) are skipped and 2 is taken again.
        s.next_id = u16::MAX;
        assert_eq!(s.take_id(), Some(u16::MAX));
        assert_eq!(s.take_id(), Some(2));
        assert_eq!(s.take_id(), Some(4));
    }

    #[test]
    fn resend_sets_dup_and_keeps_order() {
        let mut s = Session::new();
        let mut out = Vec::new();
        s.publish(&mut out, "a", &[b"1"], false, 1).unwrap();
        s.publish(&mut out, "b", &[b"2"], false, 2).unwrap();
        // §3.3.1: first byte 0x32 (QoS 1), 0x3A with DUP (bit 3).
        assert_eq!(out[0], 0x32);
        let mut again = Vec::new();
        s.resend(&mut again);
        assert_eq!(again.len(), out.len());
        assert_eq!(again[0], 0x3A);
        // Second packet: 2 header bytes + topic 3 + id 2 + payload 1 = 8 bytes each.
        assert_eq!(again[8], 0x3A);
        assert_eq!(again[10..13], [0, 1, b'b']);
    }
}
