//! The result link's own MQTT 3.1.1 client against a real mosquitto: exactly-once
//! delivery (after the consumers' dedupe on `seq`) in order across a broker restart
//! mid-stream with persistence; the resend of an unacknowledged PUBLISH with DUP set on
//! a resumed session; keepalive with a broker gone silent; a listener that never
//! answers the CONNECT. Between the daemon and mosquitto sits a loopback forwarder that
//! reads MQTT frames (fixed header and remaining length, MQTT 3.1.1 §2.2) so that it
//! can note what the daemon sent, drop the broker's PUBACKs, or go silent.

use std::io::{Read, Write};
use std::net::{TcpListener, TcpStream};
use std::sync::atomic::{AtomicU8, AtomicUsize, Ordering::SeqCst};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

use crate::support::*;

/// What the forwarder does with frames.
const FORWARD: u8 = 0;
/// Broker-to-daemon PUBACKs (type 4, MQTT 3.1.1 §3.4) are dropped.
const DROP_PUBACKS: u8 = 1;

/// A PUBLISH the daemon sent: (DUP flag §3.3.1.1, packet id §3.3.2.2, topic).
type Sent = (bool, u16, String);

/// A loopback forwarder to mosquitto that reads MQTT frames in both directions.
struct FrameProxy {
    port: u16,
    mode: Arc<AtomicU8>,
    accepted: Arc<AtomicUsize>,
    /// Connections accepted before this count (1-based) go silent both ways.
    silent_upto: Arc<AtomicUsize>,
    sent: Arc<Mutex<Vec<Sent>>>,
    conns: Arc<Mutex<Vec<TcpStream>>>,
}

impl FrameProxy {
    fn start(upstream: u16) -> Self {
        let listener = TcpListener::bind("127.0.0.1:0").expect("bind the proxy");
        let port = listener.local_addr().expect("proxy address").port();
        let p = Self {
            port,
            mode: Arc::new(AtomicU8::new(FORWARD)),
            accepted: Arc::new(AtomicUsize::new(0)),
            silent_upto: Arc::new(AtomicUsize::new(0)),
            sent: Arc::new(Mutex::new(Vec::new())),
            conns: Arc::new(Mutex::new(Vec::new())),
        };
        let (mode, accepted, silent, sent, conns) = (
            p.mode.clone(),
            p.accepted.clone(),
            p.silent_upto.clone(),
            p.sent.clone(),
            p.conns.clone(),
        );
        std::thread::spawn(move || {
            for client in listener.incoming() {
                let Ok(client) = client else { continue };
                let Ok(server) = TcpStream::connect(("127.0.0.1", upstream)) else {
                    continue;
                };
                let n = accepted.fetch_add(1, SeqCst) + 1;
                let _ = client.set_nodelay(true);
                let _ = server.set_nodelay(true);
                conns
                    .lock()
                    .unwrap()
                    .push(client.try_clone().expect("clone"));
                conns
                    .lock()
                    .unwrap()
                    .push(server.try_clone().expect("clone"));
                let (c2, s2) = (client.try_clone().unwrap(), server.try_clone().unwrap());
                let up = Pump {
                    to_broker: true,
                    conn: n,
                    mode: mode.clone(),
                    silent: silent.clone(),
                    sent: sent.clone(),
                };
                let down = Pump {
                    to_broker: false,
                    ..up.clone()
                };
                std::thread::spawn(move || up.run(client, server));
                std::thread::spawn(move || down.run(s2, c2));
            }
        });
        p
    }

    /// Closes every connection made so far (as a dropped network would).
    fn cut(&self) {
        for s in self.conns.lock().unwrap().drain(..) {
            let _ = s.shutdown(std::net::Shutdown::Both);
        }
    }

    fn accepted(&self) -> usize {
        self.accepted.load(SeqCst)
    }

    fn sent_on(&self, topic: &str) -> Vec<Sent> {
        self.sent
            .lock()
            .unwrap()
            .iter()
            .filter(|(_, _, t)| t == topic)
            .cloned()
            .collect()
    }
}

#[derive(Clone)]
struct Pump {
    to_broker: bool,
    conn: usize,
    mode: Arc<AtomicU8>,
    silent: Arc<AtomicUsize>,
    sent: Arc<Mutex<Vec<Sent>>>,
}

impl Pump {
    /// Copies frames from `from` to `to`, noting PUBLISHes towards the broker and
    /// dropping what the mode says.
    fn run(self, mut from: TcpStream, mut to: TcpStream) {
        let mut buf: Vec<u8> = Vec::new();
        let mut chunk = vec![0u8; 64 * 1024];
        loop {
            let n = match from.read(&mut chunk) {
                Ok(0) | Err(_) => break,
                Ok(n) => n,
            };
            buf.extend_from_slice(&chunk[..n]);
            while let Some(len) = frame_len(&buf) {
                let frame: Vec<u8> = buf.drain(..len).collect();
                if self.conn <= self.silent.load(SeqCst) {
                    continue; // gone silent: nothing passes either way
                }
                let kind = frame[0] >> 4;
                if self.to_broker && kind == 3 {
                    self.sent.lock().unwrap().push(publish_fields(&frame));
                }
                if !self.to_broker && kind == 4 && self.mode.load(SeqCst) == DROP_PUBACKS {
                    continue;
                }
                if to.write_all(&frame).is_err() {
                    return;
                }
            }
        }
        let _ = to.shutdown(std::net::Shutdown::Write);
    }
}

/// The length of the whole frame at the front of `b`, once it is all there: 1 byte of
/// type and flags, 1 to 4 bytes of remaining length, 7 bits each, least significant
/// first (MQTT 3.1.1 §2.2.3), then the remaining length's bytes.
fn frame_len(b: &[u8]) -> Option<usize> {
    let mut len = 0usize;
    for i in 0..4 {
        let byte = *b.get(1 + i)?;
        len |= usize::from(byte & 0x7f) << (7 * i);
        if byte & 0x80 == 0 {
            let total = 2 + i + len;
            return (b.len() >= total).then_some(total);
        }
    }
    panic!("remaining length over 4 bytes from the daemon or broker");
}

/// DUP (bit 3 of the first byte, §3.3.1.1), packet id and topic of a QoS 1 PUBLISH
/// frame (§3.3.2: topic with a 2-byte length, then the 2-byte packet id).
fn publish_fields(f: &[u8]) -> Sent {
    let mut at = 1;
    while f[at] & 0x80 != 0 {
        at += 1;
    }
    at += 1;
    let tlen = usize::from(u16::from_be_bytes([f[at], f[at + 1]]));
    let topic = String::from_utf8_lossy(&f[at + 2..at + 2 + tlen]).to_string();
    let qos = (f[0] >> 1) & 3;
    let pkid = if qos > 0 {
        u16::from_be_bytes([f[at + 2 + tlen], f[at + 3 + tlen]])
    } else {
        0
    };
    (f[0] & 0x08 != 0, pkid, topic)
}

fn wait_until(within: Duration, f: impl Fn() -> bool) -> bool {
    let until = Instant::now() + within;
    while Instant::now() < until {
        if f() {
            return true;
        }
        std::thread::sleep(Duration::from_millis(50));
    }
    f()
}

fn seqs(got: &Received) -> Vec<u64> {
    got.lock()
        .unwrap()
        .iter()
        .filter(|(t, _, _)| t == "eqwatch/test/lts1/result")
        .filter_map(|(_, p, _)| serde_json::from_str::<serde_json::Value>(p).ok())
        .filter_map(|v| v["seq"].as_u64())
        .collect()
}

fn online(got: &Received) -> bool {
    got.lock()
        .unwrap()
        .iter()
        .any(|(t, p, _)| t == "eqwatch/test/status" && p.contains("online"))
}

#[test]
fn results_arrive_once_and_in_order_across_a_broker_restart_mid_stream() {
    let rt = runtime();
    let dir = tempfile::tempdir().unwrap();
    let port = free_port();
    let broker = persistent_broker(dir.path(), port, "");
    let http = free_port();
    // Default session settings: the result link keeps its session (clean session 0).
    let config = write_lts_plant(dir.path(), port, http, "mid", "");
    // The consumer keeps its session too, so the broker's database holds what it has
    // not yet received when the broker stops.
    let got = collector_kept(&rt, port, &["eqwatch/test/lts1/result"], "keeper-mid");
    let mut d = Daemon::start(&config, http);
    assert!(wait_until(Duration::from_secs(15), || d
        .metric("eqwatch_broker_connected")
        == 1.0));
    std::thread::sleep(Duration::from_secs(1));
    let p = Publisher::new(&rt, port);
    const N: usize = 100;
    // Analyses keep coming every 20 ms (2 s in all) while the broker restarts.
    let broker = std::thread::scope(|scope| {
        scope.spawn(|| {
            for m in 1..=N as i64 {
                publish_lts_set_at(&p, &rt, m);
                std::thread::sleep(Duration::from_millis(20));
            }
        });
        assert!(
            wait_until(Duration::from_secs(20), || seqs(&got).len() >= 10),
            "no results before the restart"
        );
        // Mid-stream: a clean stop (mosquitto saves its database), then the same
        // database on the same port.
        let before = seqs(&got).len();
        assert!(stop_broker(broker, port));
        assert!(
            before < N / 2,
            "the stream ended before the restart: {before}"
        );
        persistent_broker(dir.path(), port, "")
    });
    // Every result the daemon journaled reaches the consumer. (An analysis lost on its
    // way in, between the test's publisher and the daemon's input link, makes no
    // result and no sequence number: the result link is judged on what it was given.)
    let journaled = || d.metric("eqwatch_journal_last_sequence");
    let complete = wait_until(Duration::from_secs(60), || {
        let mut s = seqs(&got);
        s.sort_unstable();
        s.dedup();
        let last = journaled();
        last >= (N - N / 10) as f64
            && d.metric("eqwatch_journal_backlog_records") == 0.0
            && s.len() as f64 == last
    });
    let all = seqs(&got);
    let made = journaled() as u64;
    assert!(
        complete,
        "{} distinct of {made} journaled results ({N} analyses): {all:?}",
        {
            let mut s = all.clone();
            s.sort_unstable();
            s.dedup();
            s.len()
        }
    );
    // Exactly once after the dedupe on seq that consumers do (QoS 1 is at least once,
    // MQTT 3.1.1 §4.3.2): first arrivals are 1..=made in order, no gaps; a repeat is
    // only ever of a record inside the in-flight window (broker.inflight, default 64).
    let mut firsts: Vec<u64> = Vec::new();
    for s in &all {
        if firsts.contains(s) {
            assert!(
                firsts.last().unwrap() - s < 64,
                "repeat of {s} long after it: {all:?}"
            );
        } else {
            firsts.push(*s);
        }
    }
    let first = firsts[0];
    assert_eq!(
        firsts,
        (first..=made).collect::<Vec<_>>(),
        "gaps or disorder: {all:?}"
    );
    // The restart reached the result link, and it came back on its kept session.
    assert!(d.metric("eqwatch_reconnects_total") >= 1.0);
    let log = std::fs::read_to_string(config.with_extension("log")).unwrap_or_default();
    assert!(
        log.lines()
            .any(|l| l.contains("results connection") && l.contains("session_present=true")),
        "no resumed session in the log:\n{log}"
    );
    assert_eq!(first, 1, "the first result of a fresh journal is seq 1");
    eprintln!("{} deliveries of {made} results: {all:?}", all.len());
    d.signal("-TERM");
    assert_eq!(d.wait_exit(Duration::from_secs(20)), Some(0));
    assert!(stop_broker(broker, port));
}

#[test]
fn an_unacknowledged_publish_is_sent_again_with_dup_on_the_resumed_session() {
    let rt = runtime();
    let mosquitto = Mosquitto::start();
    let proxy = FrameProxy::start(mosquitto.port);
    let dir = tempfile::tempdir().unwrap();
    let http = free_port();
    let config = write_lts_plant(dir.path(), proxy.port, http, "dup", "");
    let got = collector(&rt, mosquitto.port, &["eqwatch/test/#"]);
    let mut d = Daemon::start(&config, http);
    assert!(wait_until(Duration::from_secs(15), || online(&got)));
    assert!(wait_until(Duration::from_secs(15), || d
        .metric("eqwatch_broker_connected")
        == 1.0));
    std::thread::sleep(Duration::from_secs(1));
    // The broker's acknowledgements stop reaching the daemon.
    proxy.mode.store(DROP_PUBACKS, SeqCst);
    let p = Publisher::new(&rt, mosquitto.port);
    publish_lts_set(&p, &rt);
    assert!(
        wait_until(Duration::from_secs(20), || !seqs(&got).is_empty()),
        "the result did not reach the broker"
    );
    let topic = "eqwatch/test/lts1/result";
    let first = proxy.sent_on(topic);
    assert_eq!(first.len(), 1, "{first:?}");
    let (dup, pkid, _) = first[0].clone();
    assert!(!dup, "a first send has DUP 0 (MQTT 3.1.1 §3.3.1.1)");
    assert_eq!(
        d.metric("eqwatch_results_published_total"),
        0.0,
        "nothing acknowledged yet"
    );
    // The connection drops; the broker keeps the session (clean session 0), so the
    // daemon sends the PUBLISH again: DUP 1, the same packet id (§3.3.1.1, §4.4).
    proxy.mode.store(FORWARD, SeqCst);
    proxy.cut();
    assert!(
        wait_until(Duration::from_secs(20), || proxy.sent_on(topic).len() >= 2),
        "no resend after the drop: {:?}",
        proxy.sent_on(topic)
    );
    let again = proxy.sent_on(topic)[1].clone();
    assert_eq!(again, (true, pkid, topic.to_string()), "resend");
    // Its acknowledgement now arrives: the watermark moves.
    assert!(wait_until(Duration::from_secs(10), || d
        .metric("eqwatch_results_published_total")
        == 1.0));
    d.signal("-TERM");
    assert_eq!(d.wait_exit(Duration::from_secs(20)), Some(0));
}

#[test]
fn a_silent_broker_is_given_up_after_the_keepalive_and_the_link_reconnects() {
    let rt = runtime();
    let mosquitto = Mosquitto::start();
    let proxy = FrameProxy::start(mosquitto.port);
    let dir = tempfile::tempdir().unwrap();
    let http = free_port();
    // write_lts_plant: keep_alive = "5 s".
    let config = write_lts_plant(dir.path(), proxy.port, http, "silent", "");
    let got = collector(&rt, mosquitto.port, &["eqwatch/test/#"]);
    let mut d = Daemon::start(&config, http);
    assert!(wait_until(Duration::from_secs(15), || online(&got)));
    assert!(wait_until(Duration::from_secs(15), || d
        .metric("eqwatch_broker_connected")
        == 1.0));
    let before = proxy.accepted();
    assert_eq!(before, 2, "input and result links");
    // Both connections go silent: open, but nothing passes either way.
    let silent_at = Instant::now();
    proxy.silent_upto.store(before, SeqCst);
    // A PINGREQ after 5 s without sending, no PINGRESP within 5 s more: the result link
    // counts the connection lost and makes a new one (MQTT 3.1.1 §3.1.2.10).
    assert!(
        wait_until(Duration::from_secs(25), || d
            .metric("eqwatch_reconnects_total")
            >= 1.0),
        "the result link kept a silent connection"
    );
    let took = silent_at.elapsed();
    assert!(
        took >= Duration::from_secs(5),
        "gave up before a keepalive had passed: {took:?}"
    );
    assert!(wait_until(Duration::from_secs(20), || d
        .metric("eqwatch_broker_connected")
        == 1.0));
    assert!(proxy.accepted() > before);
    // And results flow on the new connection.
    let p = Publisher::new(&rt, mosquitto.port);
    std::thread::sleep(Duration::from_secs(1));
    publish_lts_set(&p, &rt);
    assert!(
        wait_until(Duration::from_secs(20), || !seqs(&got).is_empty()),
        "no result after the reconnect"
    );
    d.signal("-TERM");
    assert_eq!(d.wait_exit(Duration::from_secs(20)), Some(0));
}

#[test]
fn a_listener_that_never_answers_the_connect_is_retried() {
    // Accepts TCP and reads, never writes: no CONNACK ever comes (MQTT 3.1.1 §3.2).
    let listener = TcpListener::bind("127.0.0.1:0").unwrap();
    let port = listener.local_addr().unwrap().port();
    let result_attempts = Arc::new(AtomicUsize::new(0));
    let count = result_attempts.clone();
    std::thread::spawn(move || {
        for s in listener.incoming() {
            let Ok(mut s) = s else { continue };
            let count = count.clone();
            std::thread::spawn(move || {
                let mut seen = Vec::new();
                let mut chunk = [0u8; 4096];
                while let Ok(n) = s.read(&mut chunk) {
                    if n == 0 {
                        break;
                    }
                    seen.extend_from_slice(&chunk[..n]);
                    // The result link's client id ends in "-o" (mqtt.rs output_client_id).
                    if seen.windows(2).any(|w| w == b"-o") {
                        count.fetch_add(1, SeqCst);
                        break;
                    }
                }
                // Hold the socket open a while, silent.
                std::thread::sleep(Duration::from_secs(30));
            });
        }
    });
    let dir = tempfile::tempdir().unwrap();
    let http = free_port();
    let config = write_lts_plant(dir.path(), port, http, "mute", "");
    let text = std::fs::read_to_string(&config).unwrap().replace(
        "keep_alive = \"5 s\"",
        "keep_alive = \"5 s\"\nconnect_timeout = \"1 s\"",
    );
    std::fs::write(&config, text).unwrap();
    let mut d = Daemon::start(&config, http);
    // 1 s per attempt plus a backoff of at most 1 s (reconnect_max): three attempts in
    // well under 15 s.
    assert!(
        wait_until(Duration::from_secs(15), || result_attempts.load(SeqCst)
            >= 3),
        "{} CONNECTs from the result link",
        result_attempts.load(SeqCst)
    );
    assert!(d.metric("eqwatch_reconnects_total") >= 2.0);
    assert_eq!(d.metric("eqwatch_broker_connected"), 0.0);
    d.signal("-TERM");
    assert_eq!(d.wait_exit(Duration::from_secs(20)), Some(0));
}
