//! End-to-end speed of `eqwatch run`: a real mosquitto on a free loopback port, the
//! release binary as a child process, MQTT in and out. A measurement tool: it prints
//! numbers and asserts nothing about time.
//!
//!     cargo bench --bench e2e          (or `bash scripts/bench_e2e.sh`)
//!
//! Four figures, one run, printed as a table and written to `target/e2e-bench.txt`:
//! 1. a do-nothing QoS 1 subscriber's receive rate for analysis-sized messages pushed
//!    as fast as the broker takes them (the yardstick: what the broker and an MQTT
//!    client alone can move on this machine);
//! 2. eqwatch's sustained results per second with 100 reactors fed a firehose of
//!    analyses, and its ratio to (1);
//! 3. latency from publishing an analysis to receiving its result at a paced rate,
//!    matched by reactor and analysis timestamp (p50, p99, max);
//! 4. the daemon's peak resident set (VmHWM) in each phase: the high-water mark is reset
//!    (proc(5), `clear_refs`) after start-up and after the paced run, so the flood's
//!    peak and the paced run's peak are each their own; beside them the start-up peak
//!    (the configuration's parse) and the resident set before any analysis.
//!
//! The daemon gets the paced run (3) first and the firehose (2) after it, so that the
//! latency and the memory after (3) are those of a daemon at a plant-like load.
//!
//! Beside (3), the same paced stream to the do-nothing subscriber gives the latency of
//! the broker and the MQTT client alone. The harness's clients and the broker send
//! without Nagle's delay, so what (3) adds to that yardstick is the daemon's.
//!
//! Rates are taken over the steady part (results 10 % to 90 % of the way through),
//! so connection start-up and the tail do not count. Everything talks to 127.0.0.1
//! only; every wait is bounded, and the broker and daemon are stopped on the way out.
//!
//! Under `cargo test --all-targets` (no `--bench` argument) this does nothing.
//! 5. beside eqwatch, in the same run and through the same broker, what a user would
//!    otherwise write: `benches/python/lts_subscriber.py` (paho-mqtt + Cantera, pinned in
//!    `benches/python/requirements.txt`), which computes the shift's Q, K(T) and
//!    temperature approach for every analysis and publishes a result with QoS 1. It gets
//!    the same paced run and firehose after the daemon has stopped; eqwatch's ratios to
//!    it (results per second, CPU per result, p99) are in the table.
//!
//! `EQWATCH_E2E_QUICK=1` runs a tenth of the messages (for checking the harness).
//! `EQWATCH_BIN` overrides the daemon binary; `EQWATCH_E2E_INFLIGHT` its QoS 1 window
//! (`broker.inflight`, default 64), `EQWATCH_E2E_FSYNC` its `journal.fsync_interval`
//! (default "1 s"). `EQWATCH_E2E_PYTHON` is the Python
//! interpreter for (5) (default `.venv-bench/bin/python` when it exists; `0` or an
//! interpreter that is missing skips (5)); `scripts/bench_e2e.sh` makes that venv.

// The loopback helpers the integration tests use (free ports, mosquitto, HTTP GET).
#[path = "../tests/support/mod.rs"]
mod support;

use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::net::{SocketAddr, TcpStream};
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant, SystemTime, UNIX_EPOCH};

use rumqttc::{AsyncClient, Event, EventLoop, Incoming, MqttOptions, NetworkOptions, QoS};
use tokio::runtime::Runtime;

const SITE: &str = "bench";
const REACTORS: usize = 100;
/// Messages of the do-nothing run and analyses of the sustained run (full size).
const FIREHOSE: usize = 100_000;
/// The paced run: analyses per second, for this long.
const PACED_RATE: u64 = 1_000;
const PACED_SECS: u64 = 20;
/// The same pace to the do-nothing subscriber (its latency is the yardstick).
const NOOP_PACED_SECS: u64 = 5;
/// Bound on the wait for the last message of a run.
const DRAIN_LIMIT: Duration = Duration::from_secs(120);
/// The steady part of a run: results from this fraction of the way through to 1 − it.
const EDGE: f64 = 0.10;

fn main() {
    let args: Vec<String> = std::env::args().collect();
    if let Some(i) = args.iter().position(|a| a == "--relay") {
        let port = args.get(i + 1).and_then(|a| a.parse().ok()).unwrap_or(1883);
        let pad = args.get(i + 2).and_then(|a| a.parse().ok()).unwrap_or(0);
        relay_main(port, pad);
        return;
    }
    if !args.iter().any(|a| a == "--bench") {
        println!("e2e: a measurement run; use `cargo bench --bench e2e`");
        return;
    }
    let quick = std::env::var("EQWATCH_E2E_QUICK").is_ok_and(|v| !v.is_empty() && v != "0");
    let scale = if quick { 10 } else { 1 };
    let plan = Plan {
        firehose: FIREHOSE / scale,
        paced: (PACED_RATE * PACED_SECS) as usize / scale,
        noop_paced: (PACED_RATE * NOOP_PACED_SECS) as usize / scale,
        python: python_interpreter(),
    };
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .expect("tokio runtime");
    let report = run(&rt, &plan);
    rt.shutdown_timeout(Duration::from_secs(2));
    let text = report.table(&plan);
    print!("{text}");
    let out = target_dir().join("e2e-bench.txt");
    match std::fs::create_dir_all(target_dir()).and_then(|_| std::fs::write(&out, &text)) {
        Ok(()) => println!("(written to {})", out.display()),
        Err(e) => eprintln!("e2e: could not write {}: {e}", out.display()),
    }
}

struct Plan {
    firehose: usize,
    /// Paced messages to the daemon, and to the do-nothing subscriber.
    paced: usize,
    noop_paced: usize,
    /// The interpreter for the Python subscriber (5), when it runs.
    python: Option<PathBuf>,
}

/// `EQWATCH_E2E_PYTHON`, else the bench venv's interpreter when it exists.
fn python_interpreter() -> Option<PathBuf> {
    let manifest = Path::new(env!("CARGO_MANIFEST_DIR"));
    let p = match std::env::var_os("EQWATCH_E2E_PYTHON") {
        Some(v) if v.is_empty() || v == "0" => return None,
        Some(v) => PathBuf::from(v),
        None => manifest.join(".venv-bench/bin/python"),
    };
    let runs = Command::new(&p)
        .args(["-c", "import cantera, paho.mqtt"])
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .status()
        .is_ok_and(|s| s.success());
    if !runs {
        eprintln!(
            "e2e: {} cannot import cantera and paho.mqtt; the Python subscriber (5) is skipped \
             (pip install -r benches/python/requirements.txt)",
            p.display()
        );
    }
    runs.then_some(p)
}

fn target_dir() -> PathBuf {
    std::env::var_os("CARGO_TARGET_DIR")
        .map(PathBuf::from)
        .unwrap_or_else(|| Path::new(env!("CARGO_MANIFEST_DIR")).join("target"))
}

// ---------------------------------------------------------------------------------
// Processes: mosquitto and the daemon.

fn port_open(port: u16) -> bool {
    let addr: SocketAddr = ([127, 0, 0, 1], port).into();
    TcpStream::connect_timeout(&addr, Duration::from_millis(100)).is_ok()
}

fn wait_until(within: Duration, mut ok: impl FnMut() -> bool) -> bool {
    let until = Instant::now() + within;
    while Instant::now() < until {
        if ok() {
            return true;
        }
        std::thread::sleep(Duration::from_millis(20));
    }
    ok()
}

/// A child process stopped (TERM, then KILL after a grace period) when dropped.
struct Proc {
    child: Child,
}

impl Proc {
    fn pid(&self) -> u32 {
        self.child.id()
    }

    fn stop(&mut self, grace: Duration) {
        if let Ok(Some(_)) = self.child.try_wait() {
            return;
        }
        let _ = Command::new("kill")
            .args(["-TERM", &self.child.id().to_string()])
            .status();
        let exited = wait_until(grace, || matches!(self.child.try_wait(), Ok(Some(_))));
        if !exited {
            let _ = self.child.kill();
        }
        let _ = self.child.wait();
    }
}

impl Drop for Proc {
    fn drop(&mut self) {
        self.stop(Duration::from_secs(5));
    }
}

/// Mosquitto on a free loopback port, anonymous, no persistence. The per-client queue
/// is unbounded so that a slow subscriber falls behind instead of losing messages
/// (the default drops QoS 1 messages beyond 1000 queued), and the broker writes to its
/// clients without Nagle's delay (the default waits for the previous segment's ACK).
fn start_mosquitto(dir: &Path) -> (Proc, u16) {
    let port = support::free_port();
    let conf = dir.join("mosquitto.conf");
    let user = if support::is_root() {
        "user root\n"
    } else {
        ""
    };
    std::fs::write(
        &conf,
        format!(
            "listener {port} 127.0.0.1\nallow_anonymous true\npersistence false\nlog_dest none\nmax_queued_messages 0\nset_tcp_nodelay true\n{user}"
        ),
    )
    .expect("write mosquitto.conf");
    let child = Command::new(support::mosquitto_binary())
        .arg("-c")
        .arg(&conf)
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .expect("mosquitto must be installed (Debian package `mosquitto`)");
    let p = Proc { child };
    assert!(
        wait_until(Duration::from_secs(10), || port_open(port)),
        "mosquitto did not open port {port}"
    );
    (p, port)
}

fn eqwatch_binary() -> PathBuf {
    std::env::var_os("EQWATCH_BIN")
        .map(PathBuf::from)
        .unwrap_or_else(|| PathBuf::from(env!("CARGO_BIN_EXE_eqwatch")))
}

fn start_daemon(config: &Path, http_port: u16) -> Proc {
    let log = std::fs::File::create(config.with_extension("log")).expect("daemon log file");
    let child = Command::new(eqwatch_binary())
        .args(["run", "--config"])
        .arg(config)
        .args(["--log-level", "warn"])
        .stdout(Stdio::null())
        .stderr(Stdio::from(log))
        .spawn()
        .expect("the eqwatch binary");
    let p = Proc { child };
    assert!(
        wait_until(Duration::from_secs(15), || port_open(http_port)),
        "the daemon did not open its metrics port (see {})",
        config.with_extension("log").display()
    );
    p
}

/// CPU seconds (user + system) a process has used so far.
fn cpu_seconds(pid: u32) -> f64 {
    let Ok(stat) = std::fs::read_to_string(format!("/proc/{pid}/stat")) else {
        return f64::NAN;
    };
    // Fields after the command name (which may hold spaces) start at field 3 (state);
    // utime and stime are fields 14 and 15.
    let Some((_, rest)) = stat.rsplit_once(')') else {
        return f64::NAN;
    };
    let f: Vec<&str> = rest.split_whitespace().collect();
    let ticks = |i: usize| f.get(i).and_then(|v| v.parse::<f64>().ok());
    match (ticks(11), ticks(12)) {
        (Some(u), Some(s)) => (u + s) / clock_ticks(),
        _ => f64::NAN,
    }
}

fn clock_ticks() -> f64 {
    Command::new("getconf")
        .arg("CLK_TCK")
        .output()
        .ok()
        .and_then(|o| String::from_utf8_lossy(&o.stdout).trim().parse().ok())
        .unwrap_or(100.0)
}

/// A `kB` line of /proc/<pid>/status, in KiB.
/// Resets a process's peak resident set (VmHWM) to its current one (proc(5),
/// /proc/pid/clear_refs, "5"; Linux 4.0 and later): `false` when the kernel refused.
fn reset_hwm(pid: u32) -> bool {
    std::fs::write(format!("/proc/{pid}/clear_refs"), "5").is_ok()
}

fn status_kib(pid: u32, key: &str) -> Option<u64> {
    std::fs::read_to_string(format!("/proc/{pid}/status"))
        .ok()?
        .lines()
        .find_map(|l| l.strip_prefix(key))?
        .trim_start_matches(':')
        .split_whitespace()
        .next()?
        .parse()
        .ok()
}

/// Sums every sample of a metric family whose labels contain `label` (or all of them).
fn metric_sum(text: &str, family: &str, label: Option<&str>) -> f64 {
    text.lines()
        .filter(|l| !l.starts_with('#'))
        .filter_map(|l| {
            let rest = l.strip_prefix(family)?;
            if !(rest.starts_with(' ') || rest.starts_with('{')) {
                return None;
            }
            if label.is_some_and(|want| !rest.contains(want)) {
                return None;
            }
            rest.rsplit_once(' ')?.1.trim().parse::<f64>().ok()
        })
        .sum()
}

// ---------------------------------------------------------------------------------
// MQTT clients.

fn options(prefix: &str, port: u16) -> MqttOptions {
    let mut o = MqttOptions::new(
        format!("{prefix}-{}", support::free_port()),
        "127.0.0.1",
        port,
    );
    o.set_keep_alive(Duration::from_secs(30));
    o.set_max_packet_size(1 << 20, 1 << 20);
    o
}

/// The harness's own clients send at once (no Nagle delay), so that the latency is the
/// broker's and the daemon's.
fn no_delay(ev: &mut EventLoop) {
    let mut n = NetworkOptions::new();
    n.set_tcp_nodelay(true);
    ev.set_network_options(n);
}

/// One received message: when, and what the receiver kept of it.
#[derive(Clone, Copy)]
struct Got {
    at: Instant,
    /// Result runs: the analysis timestamp (epoch ms) the result answers.
    analysis_ts: Option<i64>,
    good: bool,
}

#[derive(Default)]
struct Inbox {
    got: Vec<Got>,
    /// Results whose reactor (topic) did not match the reactor of their timestamp.
    mismatched: usize,
    online: bool,
    /// Payload bytes of the results kept.
    bytes: usize,
}

/// What a subscriber does with a message.
#[derive(Clone, Copy, PartialEq)]
enum Keep {
    /// The yardstick: note the arrival time and the `ts` the message starts with.
    Nothing,
    /// eqwatch results: also the analysis timestamp and the quality (substring
    /// search, no JSON tree), and the status topic's `online`.
    Results { base_ms: i64 },
}

struct Subscriber {
    inbox: Arc<Mutex<Inbox>>,
    subscribed: Arc<AtomicBool>,
}

impl Subscriber {
    fn start(rt: &Runtime, port: u16, filters: &[String], keep: Keep) -> Self {
        let inbox = Arc::new(Mutex::new(Inbox::default()));
        let subscribed = Arc::new(AtomicBool::new(false));
        let (client, mut ev) = AsyncClient::new(options("e2e-sub", port), 64);
        no_delay(&mut ev);
        let filters = filters.to_vec();
        let (ib, sb) = (inbox.clone(), subscribed.clone());
        rt.spawn(async move {
            let mut acks = 0;
            loop {
                match ev.poll().await {
                    Ok(Event::Incoming(Incoming::ConnAck(_))) => {
                        for f in &filters {
                            let _ = client.subscribe(f.clone(), QoS::AtLeastOnce).await;
                        }
                    }
                    Ok(Event::Incoming(Incoming::SubAck(_))) => {
                        acks += 1;
                        if acks >= filters.len() {
                            sb.store(true, Ordering::Release);
                        }
                    }
                    Ok(Event::Incoming(Incoming::Publish(p))) => {
                        let at = Instant::now();
                        match keep {
                            Keep::Nothing => {
                                let analysis_ts = leading_ts(&p.payload);
                                ib.lock().unwrap().got.push(Got {
                                    at,
                                    analysis_ts,
                                    good: true,
                                })
                            }
                            Keep::Results { base_ms } => {
                                keep_result(&ib, at, &p.topic, &p.payload, base_ms)
                            }
                        }
                    }
                    Ok(_) => {}
                    Err(_) => tokio::time::sleep(Duration::from_millis(100)).await,
                }
            }
        });
        Self { inbox, subscribed }
    }

    fn wait_subscribed(&self) {
        assert!(
            wait_until(Duration::from_secs(10), || self
                .subscribed
                .load(Ordering::Acquire)),
            "subscription not acknowledged"
        );
    }

    fn count(&self) -> usize {
        self.inbox.lock().unwrap().got.len()
    }

    fn take(&self) -> Inbox {
        std::mem::take(&mut *self.inbox.lock().unwrap())
    }
}

/// The epoch-ms `ts` at the head of the harness's own messages (`{"ts":123,...`).
fn leading_ts(payload: &[u8]) -> Option<i64> {
    let rest = payload.strip_prefix(b"{\"ts\":")?;
    let end = rest.iter().position(|b| !b.is_ascii_digit())?;
    std::str::from_utf8(&rest[..end]).ok()?.parse().ok()
}

fn keep_result(inbox: &Mutex<Inbox>, at: Instant, topic: &str, payload: &[u8], base_ms: i64) {
    let text = String::from_utf8_lossy(payload);
    if topic.ends_with("/status") {
        if text.contains("\"online\"") {
            inbox.lock().unwrap().online = true;
        }
        return;
    }
    let field = |name: &str| -> Option<&str> {
        let key = format!("\"{name}\":\"");
        let start = text.find(&key)? + key.len();
        let len = text[start..].find('"')?;
        Some(&text[start..start + len])
    };
    let analysis_ts = field("analysis_ts").and_then(eqwatch::timefmt::parse_rfc3339);
    let good = field("quality") == Some("good");
    // The topic's reactor must be the one the timestamp was sent to.
    let reactor = topic.split('/').nth(2).unwrap_or("");
    let matches = analysis_ts.is_some_and(|ts| reactor == reactor_id(index_of(ts, base_ms)));
    let mut ib = inbox.lock().unwrap();
    if !matches {
        ib.mismatched += 1;
    }
    ib.bytes += payload.len();
    ib.got.push(Got {
        at,
        analysis_ts,
        good,
    });
}

fn publisher(rt: &Runtime, port: u16) -> AsyncClient {
    let mut o = options("e2e-pub", port);
    o.set_inflight(1000);
    let (client, mut ev) = AsyncClient::new(o, 1024);
    no_delay(&mut ev);
    rt.spawn(async move {
        loop {
            if ev.poll().await.is_err() {
                tokio::time::sleep(Duration::from_millis(100)).await;
            }
        }
    });
    client
}

// ---------------------------------------------------------------------------------
// The do-nothing relay (1b): what any daemon that receives a message and publishes one
// for it costs the broker and the MQTT client, with no work in between.

/// `<bench binary> --relay <port> <pad>`: subscribes to `e2e-relay/+/ai` with QoS 1 and,
/// for every message, publishes its payload padded to `pad` bytes (the size of an
/// eqwatch result) to `e2e-relay/<reactor>/result` with QoS 1 over a second connection,
/// as the daemon does. One thread (a current-thread runtime, like the daemon's), the
/// same client library, no Nagle delay.
fn relay_main(port: u16, pad: usize) {
    let Ok(rt) = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
    else {
        return;
    };
    rt.block_on(async move {
        let mut out_options = options("e2e-relay-out", port);
        out_options.set_inflight(64);
        let (out, mut out_ev) = AsyncClient::new(out_options, 1024);
        no_delay(&mut out_ev);
        tokio::spawn(async move {
            loop {
                if out_ev.poll().await.is_err() {
                    tokio::time::sleep(Duration::from_millis(100)).await;
                }
            }
        });
        let (input, mut in_ev) = AsyncClient::new(options("e2e-relay-in", port), 64);
        no_delay(&mut in_ev);
        loop {
            match in_ev.poll().await {
                Ok(Event::Incoming(Incoming::ConnAck(_))) => {
                    let _ = input.subscribe("e2e-relay/+/ai", QoS::AtLeastOnce).await;
                }
                Ok(Event::Incoming(Incoming::Publish(p))) => {
                    let reactor = p.topic.split('/').nth(1).unwrap_or("r");
                    let topic = format!("e2e-relay/{reactor}/result");
                    let mut body = p.payload.to_vec();
                    if body.len() < pad && body.last() == Some(&b'}') {
                        body.pop();
                        body.extend_from_slice(b",\"pad\":\"");
                        body.resize(pad.saturating_sub(2).max(body.len()), b'x');
                        body.extend_from_slice(b"\"}");
                    }
                    let _ = out.publish(topic, QoS::AtLeastOnce, false, body).await;
                }
                Ok(_) => {}
                Err(_) => tokio::time::sleep(Duration::from_millis(100)).await,
            }
        }
    });
}

/// The relay as a child process (so that its CPU is measured like the daemon's).
fn start_relay(port: u16, pad: usize) -> Proc {
    let child = std::env::current_exe()
        .and_then(|exe| {
            Command::new(exe)
                .args(["--relay", &port.to_string(), &pad.to_string()])
                .stdout(Stdio::null())
                .stderr(Stdio::null())
                .spawn()
        })
        .expect("the bench binary as a relay");
    Proc { child }
}

// ---------------------------------------------------------------------------------
// The plant: 100 LTS-like reactors, dry analyser with 5 components, one thermocouple,
// pressure, fixed steam ratio.

fn reactor_id(i: usize) -> String {
    format!("r{i:03}")
}

fn write_config(dir: &Path, broker_port: u16, http_port: u16) -> PathBuf {
    // The daemon's QoS 1 window (`broker.inflight`); EQWATCH_E2E_INFLIGHT overrides it.
    let inflight: u16 = std::env::var("EQWATCH_E2E_INFLIGHT")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(64);
    // The journal's fsync period; EQWATCH_E2E_FSYNC (e.g. "1 h") shows what the syncs
    // cost in latency.
    let fsync = std::env::var("EQWATCH_E2E_FSYNC").unwrap_or_else(|_| "1 s".into());
    let mut s = format!(
        r#"site = "{SITE}"
[broker]
url = "mqtt://127.0.0.1:{broker_port}"
client_id = "eqwatch-e2e-{http_port}"
keep_alive = "30 s"
session_expiry = "0 s"
reconnect_min = "100 ms"
reconnect_max = "1 s"
inflight = {inflight}
max_packet_bytes = 262144
[journal]
dir = "journal"
fsync_interval = "{fsync}"
[http]
listen = "127.0.0.1:{http_port}"
"#
    );
    for i in 0..REACTORS {
        let id = reactor_id(i);
        let _ = write!(
            s,
            r#"
[reactors.{id}]
name = "Bench LTS {i}"
reactions = [{{ equation = "CO + H2O = CO2 + H2", k_source = "moe-1962" }}]
[reactors.{id}.composition]
tag = "AI-{id}"
topic = "e2e/{id}/ai"
unit = "mol%"
basis = "dry"
components = ["H2", "N2", "CO", "CO2", "CH4"]
lag = "0 s"
max_age = "1 d"
[[reactors.{id}.temperature]]
tag = "TI-{id}"
topic = "e2e/{id}/ti"
unit = "degC"
max_age = "1 d"
[reactors.{id}.pressure]
tag = "PI-{id}"
topic = "e2e/{id}/pi"
unit = "barg"
max_age = "1 d"
[reactors.{id}.steam_ratio]
value = 0.36
"#
        );
    }
    let path = dir.join("plant.toml");
    std::fs::write(&path, s).expect("write plant.toml");
    path
}

/// Analysis number `k` of a run goes to reactor `k % 100` with timestamp `base + k` ms,
/// so every analysis has its own timestamp and each reactor's timestamps increase.
fn index_of(ts_ms: i64, base_ms: i64) -> usize {
    usize::try_from(ts_ms - base_ms).unwrap_or(usize::MAX) % REACTORS
}

/// An analyser message of about 200 bytes. The hydrogen figure moves a little from
/// message to message (a live analyser never repeats every digit; three identical
/// analyses in a row would be flagged as a stuck analyser).
fn analysis(k: usize, ts_ms: i64) -> String {
    let h2 = 61.0536 + (k % 997) as f64 * 1e-5;
    format!(
        r#"{{"ts":{ts_ms},"values":{{"H2":{h2:.5},"N2":18.98637,"CO":0.28697,"CO2":19.38096,"CH4":0.2921}},"unit":"mol%","basis":"dry","quality":"good","analyser":"AI-{}","seq":{k}}}"#,
        reactor_id(k % REACTORS)
    )
}

fn scalar(ts_ms: i64, value: f64, unit: &str) -> String {
    format!(r#"{{"ts":{ts_ms},"value":{value},"unit":"{unit}","quality":"good"}}"#)
}

fn now_ms() -> i64 {
    SystemTime::now()
        .duration_since(UNIX_EPOCH)
        .map_or(0, |d| d.as_millis() as i64)
}

// ---------------------------------------------------------------------------------
// Figures.

/// Messages per second over the steady part of a run of arrival times.
fn steady_rate(times: &[Instant]) -> f64 {
    let n = times.len();
    if n < 10 {
        return f64::NAN;
    }
    let lo = (n as f64 * EDGE) as usize;
    let hi = ((n as f64 * (1.0 - EDGE)) as usize).min(n - 1);
    let span = times[hi].duration_since(times[lo]).as_secs_f64();
    if span > 0.0 {
        (hi - lo) as f64 / span
    } else {
        f64::NAN
    }
}

fn percentile(sorted: &[f64], p: f64) -> f64 {
    if sorted.is_empty() {
        return f64::NAN;
    }
    let rank = ((p / 100.0) * sorted.len() as f64).ceil() as usize;
    sorted[rank.clamp(1, sorted.len()) - 1]
}

/// Latencies in ms, sorted: each received message matched to its send time by the
/// timestamp it carries (`base + first + j` for the `j`-th paced message).
fn latencies(got: &[Got], sent: &[Instant], base: i64, first: usize) -> Vec<f64> {
    let mut lat: Vec<f64> = got
        .iter()
        .filter_map(|g| {
            let k = usize::try_from(g.analysis_ts? - base).ok()?;
            let at = sent.get(k.checked_sub(first)?)?;
            Some(g.at.saturating_duration_since(*at).as_secs_f64() * 1e3)
        })
        .collect();
    lat.sort_by(f64::total_cmp);
    lat
}

/// Publishes analyses `first..first + m` at `PACED_RATE` per second; returns the send
/// times (taken just before each publish is queued).
fn paced(
    rt: &Runtime,
    client: &AsyncClient,
    prefix: &str,
    base: i64,
    first: usize,
    m: usize,
) -> Vec<Instant> {
    rt.block_on(async {
        let mut sent = Vec::with_capacity(m);
        let step = Duration::from_nanos(1_000_000_000 / PACED_RATE);
        let t0 = tokio::time::Instant::now() + Duration::from_millis(50);
        for j in 0..m {
            tokio::time::sleep_until(t0 + step * j as u32).await;
            let k = first + j;
            let topic = format!("{prefix}/{}/ai", reactor_id(k % REACTORS));
            let payload = analysis(k, base + k as i64);
            sent.push(Instant::now());
            let _ = client
                .publish(topic, QoS::AtLeastOnce, false, payload)
                .await;
        }
        sent
    })
}

/// Publishes analyses `first..first + n` as fast as the client and broker take them.
fn firehose_from(
    rt: &Runtime,
    client: &AsyncClient,
    prefix: &str,
    base: i64,
    first: usize,
    n: usize,
) {
    rt.block_on(async {
        for k in first..first + n {
            let topic = format!("{prefix}/{}/ai", reactor_id(k % REACTORS));
            let _ = client
                .publish(topic, QoS::AtLeastOnce, false, analysis(k, base + k as i64))
                .await;
        }
    });
}

fn achieved_rate(sent: &[Instant]) -> f64 {
    match (sent.first(), sent.last()) {
        (Some(a), Some(b)) if sent.len() > 1 => {
            (sent.len() - 1) as f64 / b.duration_since(*a).as_secs_f64().max(1e-9)
        }
        _ => f64::NAN,
    }
}

#[derive(Default)]
struct Report {
    noop_received: usize,
    noop_rate: f64,
    noop_broker_cpu_s: f64,
    noop_wall_s: f64,
    noop_lat_ms: Vec<f64>,
    noop_lat_sent: usize,
    sus_received: usize,
    sus_good: usize,
    sus_rate: f64,
    sus_wall_s: f64,
    sus_daemon_cpu_s: f64,
    sus_broker_cpu_s: f64,
    lat_sent: usize,
    lat_achieved_rate: f64,
    lat_ms: Vec<f64>,
    lat_daemon_cpu_s: f64,
    mismatched: usize,
    idle_hwm_kib: Option<u64>,
    idle_rss_kib: Option<u64>,
    /// RssAnon before any analysis, after the paced run, after the flood.
    anon_kib: [Option<u64>; 3],
    /// Whether the high-water mark could be reset between phases.
    hwm_reset: bool,
    /// Peak over the whole run, and at the end of the paced run (before the firehose).
    vm_hwm_kib: Option<u64>,
    paced_hwm_kib: Option<u64>,
    vm_rss_kib: Option<u64>,
    evaluations: BTreeMap<&'static str, f64>,
    messages_in: f64,
    journal_errors: f64,
    journal_dropped_unpublished: f64,
    daemon_log_lines: usize,
    /// Mean payload of an eqwatch result (the relay pads to it).
    result_bytes: usize,
    relay_received: usize,
    relay_rate: f64,
    relay_wall_s: f64,
    relay_cpu_s: f64,
    relay_broker_cpu_s: f64,
    relay_lat_ms: Vec<f64>,
    relay_hwm_kib: Option<u64>,
    py: Option<PyReport>,
}

/// The Python subscriber's figures (5).
#[derive(Default)]
struct PyReport {
    received: usize,
    sent: usize,
    rate: f64,
    wall_s: f64,
    cpu_s: f64,
    lat_ms: Vec<f64>,
    lat_sent: usize,
    hwm_kib: Option<u64>,
    mismatched: usize,
}

impl Report {
    fn table(&self, plan: &Plan) -> String {
        let mut t = String::new();
        let ratio = 100.0 * self.sus_rate / self.noop_rate;
        let p = |v: &[f64], q: f64| percentile(v, q);
        let max = |v: &[f64]| v.last().copied().unwrap_or(f64::NAN);
        let mib = |k: Option<u64>| k.map_or(f64::NAN, |k| k as f64 / 1024.0);
        let row = |t: &mut String, name: &str, value: String, goal: &str| {
            let _ = writeln!(t, "{name:<44} {value:>12}  {goal}");
        };
        let _ = writeln!(
            t,
            "\n== eqwatch end-to-end ({REACTORS} reactors, mosquitto on loopback, {} CPUs)",
            std::thread::available_parallelism().map_or(0, |n| n.get())
        );
        let _ = writeln!(t, "daemon binary: {}", eqwatch_binary().display());
        row(&mut t, "figure", "value".into(), "goal");
        row(
            &mut t,
            "1. do-nothing subscriber (msg/s)",
            format!("{:.0}", self.noop_rate),
            "",
        );
        row(
            &mut t,
            "1b. do-nothing relay, in + out QoS 1 (msg/s)",
            format!("{:.0}", self.relay_rate),
            "",
        );
        row(
            &mut t,
            "2. eqwatch sustained (results/s)",
            format!("{:.0}", self.sus_rate),
            "",
        );
        row(
            &mut t,
            "   ratio to do-nothing",
            format!("{ratio:.1} %"),
            ">= 80 %",
        );
        row(
            &mut t,
            "   ratio to the do-nothing relay",
            format!("{:.1} %", 100.0 * self.sus_rate / self.relay_rate),
            "",
        );
        let per = |cpu: f64, n: usize| 1e6 * cpu / n.max(1) as f64;
        row(
            &mut t,
            "   CPU per result, eqwatch / relay (us)",
            format!(
                "{:.1} / {:.1}",
                per(self.sus_daemon_cpu_s, self.sus_received),
                per(self.relay_cpu_s, self.relay_received)
            ),
            "<= 20 us",
        );
        row(
            &mut t,
            &format!("3. latency at {PACED_RATE}/s, p50 (ms)"),
            format!("{:.2}", p(&self.lat_ms, 50.0)),
            "",
        );
        // The goal is relative: within 1 ms of the do-nothing subscriber's p99 measured
        // through the same broker in the same run (the machine's own jitter is in both).
        let noop_p99 = p(&self.noop_lat_ms, 99.0);
        row(
            &mut t,
            "   p99 (ms)",
            format!("{:.2}", p(&self.lat_ms, 99.0)),
            &format!("<= {:.2} ms (do-nothing + 1)", noop_p99 + 1.0),
        );
        row(
            &mut t,
            "   max (ms)",
            format!("{:.2}", max(&self.lat_ms)),
            "",
        );
        // Where the tail starts, beside the relay's (a do-nothing republisher).
        let tail = |l: &[f64]| format!("{:.2} / {:.2} / {:.2}", p(l, 90.0), p(l, 95.0), p(l, 99.9));
        row(
            &mut t,
            "   p90 / p95 / p99.9, eqwatch (ms)",
            tail(&self.lat_ms),
            "",
        );
        row(
            &mut t,
            "   p90 / p95 / p99.9, relay (ms)",
            tail(&self.relay_lat_ms),
            "",
        );
        row(
            &mut t,
            "   do-nothing p50 / p99 / max (ms)",
            format!(
                "{:.2} / {:.2} / {:.2}",
                p(&self.noop_lat_ms, 50.0),
                p(&self.noop_lat_ms, 99.0),
                max(&self.noop_lat_ms)
            ),
            "(yardstick)",
        );
        row(
            &mut t,
            "   relay p50 / p99 / max (ms)",
            format!(
                "{:.2} / {:.2} / {:.2}",
                p(&self.relay_lat_ms, 50.0),
                p(&self.relay_lat_ms, 99.0),
                max(&self.relay_lat_ms)
            ),
            "(yardstick)",
        );
        // Each phase's own peak: the high-water mark is reset at its start (clear_refs);
        // where the kernel refused, the figure is the peak since start-up ("(run)").
        let since = if self.hwm_reset { "" } else { " (run)" };
        row(
            &mut t,
            &format!("4. daemon peak RSS under the flood, VmHWM{since} (MiB)"),
            format!("{:.2}", mib(self.vm_hwm_kib)),
            "<= 16 MiB",
        );
        row(
            &mut t,
            &format!("   peak RSS during the {PACED_RATE}/s run{since} (MiB)"),
            format!("{:.2}", mib(self.paced_hwm_kib)),
            "<= 10 MiB",
        );
        row(
            &mut t,
            "   peak RSS at start-up, before any analysis (MiB)",
            format!("{:.2}", mib(self.idle_hwm_kib)),
            "",
        );
        row(
            &mut t,
            "   RSS before any analysis (MiB)",
            format!("{:.2}", mib(self.idle_rss_kib)),
            "",
        );
        // The daemon's own memory (heap, stacks) without the shared program and library
        // pages, whose resident share moves with the page cache from run to run.
        row(
            &mut t,
            "   RssAnon: idle / after paced / after flood (MiB)",
            format!(
                "{:.2} / {:.2} / {:.2}",
                mib(self.anon_kib[0]),
                mib(self.anon_kib[1]),
                mib(self.anon_kib[2])
            ),
            "",
        );
        if let Some(py) = &self.py {
            let us = |cpu: f64, n: usize| 1e6 * cpu / n.max(1) as f64;
            let eq_us = us(self.sus_daemon_cpu_s, self.sus_received);
            let py_us = us(py.cpu_s, py.received);
            // Delivered over the whole firehose (results that arrived / time to the last
            // one): the steady-part rate flatters a subscriber whose results come in
            // bursts and that drops what it cannot queue.
            let delivered = |n: usize, wall_s: f64| n as f64 / wall_s;
            let eq_delivered = delivered(self.sus_received, self.sus_wall_s);
            let py_delivered = delivered(py.received, py.wall_s);
            row(
                &mut t,
                "5. Python paho + Cantera, delivered (results/s)",
                format!("{py_delivered:.0}"),
                "(what a user would write)",
            );
            row(
                &mut t,
                "   results delivered of the firehose, Python",
                format!("{} / {}", py.received, plan.firehose),
                "",
            );
            row(
                &mut t,
                "   Python steady-part rate (results/s)",
                format!("{:.0}", py.rate),
                "(bursts)",
            );
            row(
                &mut t,
                "   eqwatch / Python, delivered results/s",
                format!("{:.2} x", eq_delivered / py_delivered),
                "",
            );
            row(
                &mut t,
                "   CPU per result, eqwatch / Python (us)",
                format!("{eq_us:.1} / {py_us:.1}"),
                "",
            );
            row(
                &mut t,
                &format!("   p99 at {PACED_RATE}/s, eqwatch / Python (ms)"),
                format!("{:.2} / {:.2}", p(&self.lat_ms, 99.0), p(&py.lat_ms, 99.0)),
                "",
            );
            row(
                &mut t,
                "   Python p50 / max (ms); VmHWM (MiB)",
                format!(
                    "{:.2} / {:.2}; {:.1}",
                    p(&py.lat_ms, 50.0),
                    max(&py.lat_ms),
                    mib(py.hwm_kib)
                ),
                "",
            );
        }
        let _ = writeln!(t, "-- details");
        let _ = writeln!(
            t,
            "do-nothing: {}/{} received in {:.2} s, broker CPU {:.2} s; paced {} sent, {} matched",
            self.noop_received,
            plan.firehose,
            self.noop_wall_s,
            self.noop_broker_cpu_s,
            self.noop_lat_sent,
            self.noop_lat_ms.len()
        );
        let _ = writeln!(
            t,
            "relay: {}/{} relayed in {:.2} s, relay CPU {:.2} s, broker CPU {:.2} s, payload out {} B, VmHWM {:.2} MiB; paced {} matched",
            self.relay_received,
            plan.firehose,
            self.relay_wall_s,
            self.relay_cpu_s,
            self.relay_broker_cpu_s,
            self.result_bytes,
            mib(self.relay_hwm_kib),
            self.relay_lat_ms.len()
        );
        let per_result_us = 1e6 * self.sus_daemon_cpu_s / self.sus_received.max(1) as f64;
        let _ = writeln!(
            t,
            "sustained: {}/{} results ({} good) in {:.2} s; daemon CPU {:.2} s ({:.1} us/result), broker CPU {:.2} s",
            self.sus_received,
            plan.firehose,
            self.sus_good,
            self.sus_wall_s,
            self.sus_daemon_cpu_s,
            per_result_us,
            self.sus_broker_cpu_s
        );
        let _ = writeln!(
            t,
            "paced: {} sent at {:.0}/s, {} results matched by reactor + analysis_ts; daemon CPU {:.2} s",
            self.lat_sent,
            self.lat_achieved_rate,
            self.lat_ms.len(),
            self.lat_daemon_cpu_s
        );
        let q = |k: &str| self.evaluations.get(k).copied().unwrap_or(f64::NAN);
        let _ = writeln!(
            t,
            "daemon: VmRSS {:.2} MiB at the end; messages received {}; evaluations good {} / uncertain {} / bad {}; journal errors {}; journal dropped unpublished {}; log lines {}; topic/ts mismatches {}",
            mib(self.vm_rss_kib),
            self.messages_in,
            q("good"),
            q("uncertain"),
            q("bad"),
            self.journal_errors,
            self.journal_dropped_unpublished,
            self.daemon_log_lines,
            self.mismatched
        );
        match &self.py {
            Some(py) => {
                let _ = writeln!(
                    t,
                    "python: paced {} sent, {} matched; firehose {}/{} results in {:.2} s, CPU {:.2} s; topic/ts mismatches {}",
                    py.lat_sent,
                    py.lat_ms.len(),
                    py.received,
                    py.sent,
                    py.wall_s,
                    py.cpu_s,
                    py.mismatched
                );
            }
            None => {
                let _ = writeln!(
                    t,
                    "python: not run (EQWATCH_E2E_PYTHON, or bash scripts/bench_e2e.sh which makes .venv-bench)"
                );
            }
        }
        t
    }
}

// ---------------------------------------------------------------------------------
// The run.

fn run(rt: &Runtime, plan: &Plan) -> Report {
    let dir = tempfile::tempdir().expect("temp dir");
    let (mut broker, port) = start_mosquitto(dir.path());
    let mut r = Report::default();
    let n = plan.firehose;

    // 1. Do-nothing subscriber: the firehose, then the paced stream for its latency.
    eprintln!("e2e: 1/5 do-nothing subscriber, {n} messages");
    {
        let sub = Subscriber::start(rt, port, &["e2e-noop/#".to_string()], Keep::Nothing);
        sub.wait_subscribed();
        let client = publisher(rt, port);
        let base = now_ms() - 1_000_000;
        let cpu0 = cpu_seconds(broker.pid());
        let start = Instant::now();
        firehose_from(rt, &client, "e2e-noop", base, 0, n);
        wait_until(DRAIN_LIMIT, || sub.count() >= n);
        r.noop_broker_cpu_s = cpu_seconds(broker.pid()) - cpu0;
        let got = sub.take().got;
        r.noop_received = got.len();
        r.noop_wall_s = got
            .last()
            .map_or(f64::NAN, |g| g.at.duration_since(start).as_secs_f64());
        r.noop_rate = steady_rate(&got.iter().map(|g| g.at).collect::<Vec<_>>());
        let m = plan.noop_paced;
        let sent = paced(rt, &client, "e2e-noop", base, n, m);
        wait_until(Duration::from_secs(10), || sub.count() >= m);
        r.noop_lat_sent = sent.len();
        r.noop_lat_ms = latencies(&sub.take().got, &sent, base, n);
        let _ = rt.block_on(client.disconnect());
    }

    // The daemon with 100 reactors. Analysis timestamps lie in the recent past (age well
    // inside max_age) and increase through both runs: base + k for k = 0.. (paced),
    // then on (firehose).
    let base = now_ms() - 1_000_000;
    let http = support::free_port();
    let config = write_config(dir.path(), port, http);
    let mut daemon = start_daemon(&config, http);
    let results = Subscriber::start(
        rt,
        port,
        &[
            format!("eqwatch/{SITE}/+/result"),
            format!("eqwatch/{SITE}/status"),
        ],
        Keep::Results { base_ms: base },
    );
    results.wait_subscribed();
    assert!(
        wait_until(Duration::from_secs(15), || results
            .inbox
            .lock()
            .unwrap()
            .online),
        "the daemon never said online"
    );
    let client = publisher(rt, port);
    rt.block_on(async {
        for i in 0..REACTORS {
            let id = reactor_id(i);
            let ts = base - 1_000;
            for (topic, payload) in [
                (format!("e2e/{id}/ti"), scalar(ts, 220.0, "degC")),
                (format!("e2e/{id}/pi"), scalar(ts, 29.0, "barg")),
            ] {
                let _ = client
                    .publish(topic, QoS::AtLeastOnce, false, payload)
                    .await;
            }
        }
    });
    let received = || {
        metric_sum(
            &support::http_get(http, "/metrics"),
            "eqwatch_messages_received_total",
            None,
        )
    };
    wait_until(Duration::from_secs(15), || {
        received() >= (2 * REACTORS) as f64
    });
    r.idle_hwm_kib = status_kib(daemon.pid(), "VmHWM");
    r.idle_rss_kib = status_kib(daemon.pid(), "VmRSS");
    r.anon_kib[0] = status_kib(daemon.pid(), "RssAnon");
    // From here each phase's peak is its own (start-up's configuration parse is above).
    r.hwm_reset = reset_hwm(daemon.pid());

    // 3. Latency at a paced rate (first, so that it and its memory peak are those of a
    // daemon at a plant-like load, not one recovering from the firehose).
    let m = plan.paced;
    eprintln!("e2e: 2/5 eqwatch latency, {m} analyses at {PACED_RATE}/s over {REACTORS} reactors");
    let d0 = cpu_seconds(daemon.pid());
    let sent = paced(rt, &client, "e2e", base, 0, m);
    r.lat_sent = sent.len();
    r.lat_achieved_rate = achieved_rate(&sent);
    wait_until(Duration::from_secs(30), || results.count() >= m);
    r.lat_daemon_cpu_s = cpu_seconds(daemon.pid()) - d0;
    let inbox = results.take();
    r.mismatched += inbox.mismatched;
    let inbox_bytes = inbox.bytes;
    r.lat_ms = latencies(&inbox.got, &sent, base, 0);
    r.paced_hwm_kib = status_kib(daemon.pid(), "VmHWM");
    r.anon_kib[1] = status_kib(daemon.pid(), "RssAnon");
    r.hwm_reset &= reset_hwm(daemon.pid());

    // 2. Sustained evaluations: the firehose.
    eprintln!("e2e: 3/5 eqwatch sustained, {n} analyses over {REACTORS} reactors");
    let (d0, b0) = (cpu_seconds(daemon.pid()), cpu_seconds(broker.pid()));
    let start = Instant::now();
    firehose_from(rt, &client, "e2e", base, m, n);
    wait_until(DRAIN_LIMIT, || results.count() >= n);
    r.sus_daemon_cpu_s = cpu_seconds(daemon.pid()) - d0;
    r.sus_broker_cpu_s = cpu_seconds(broker.pid()) - b0;
    let inbox = results.take();
    r.mismatched += inbox.mismatched;
    let got: Vec<Got> = inbox
        .got
        .into_iter()
        .filter(|g| g.analysis_ts.is_some_and(|ts| ts >= base + m as i64))
        .collect();
    r.sus_received = got.len();
    r.sus_good = got.iter().filter(|g| g.good).count();
    r.sus_wall_s = got
        .last()
        .map_or(f64::NAN, |g| g.at.duration_since(start).as_secs_f64());
    r.sus_rate = steady_rate(&got.iter().map(|g| g.at).collect::<Vec<_>>());

    // 4. Peak resident set over the run, and the daemon's own counts.
    eprintln!("e2e: 4/5 daemon memory and counters");
    r.vm_hwm_kib = status_kib(daemon.pid(), "VmHWM");
    r.vm_rss_kib = status_kib(daemon.pid(), "VmRSS");
    r.anon_kib[2] = status_kib(daemon.pid(), "RssAnon");
    let text = support::http_get(http, "/metrics");
    for q in ["good", "uncertain", "bad"] {
        let label = format!("quality=\"{q}\"");
        r.evaluations.insert(
            q,
            metric_sum(&text, "eqwatch_evaluations_total", Some(&label)),
        );
    }
    r.messages_in = metric_sum(&text, "eqwatch_messages_received_total", None);
    r.journal_errors = metric_sum(&text, "eqwatch_journal_errors_total", None);
    r.journal_dropped_unpublished =
        metric_sum(&text, "eqwatch_journal_dropped_unpublished_total", None);
    let _ = rt.block_on(client.disconnect());
    daemon.stop(Duration::from_secs(15));
    r.daemon_log_lines =
        std::fs::read_to_string(config.with_extension("log")).map_or(0, |s| s.lines().count());
    drop(results);
    r.result_bytes = inbox_bytes / plan.paced.max(1);

    // 1b. The do-nothing relay, alone with the broker now.
    eprintln!("e2e: relay yardstick, {n} messages");
    relay_run(rt, port, &broker, plan, &mut r);

    // 5. The hand-written Python subscriber, alone with the broker now.
    if let Some(python) = &plan.python {
        r.py = Some(python_run(rt, python, dir.path(), port, plan));
    }
    broker.stop(Duration::from_secs(5));
    r
}

/// The relay (1b): the firehose and then the paced stream through it.
fn relay_run(rt: &Runtime, port: u16, broker: &Proc, plan: &Plan, r: &mut Report) {
    let mut relay = start_relay(port, r.result_bytes);
    let sub = Subscriber::start(rt, port, &["e2e-relay/+/result".to_string()], Keep::Nothing);
    sub.wait_subscribed();
    let client = publisher(rt, port);
    let base = now_ms() - 1_000_000;
    // Probes until the relay answers (its subscription is then in place).
    let ready = wait_until(Duration::from_secs(15), || {
        let topic = "e2e-relay/probe/ai".to_string();
        let _ = rt.block_on(client.publish(topic, QoS::AtLeastOnce, false, scalar(0, 0.0, "K")));
        sub.count() > 0
    });
    if !ready {
        eprintln!("e2e: the relay never answered");
        return;
    }
    std::thread::sleep(Duration::from_millis(200));
    let _ = sub.take();
    let n = plan.firehose;
    let (c0, b0) = (cpu_seconds(relay.pid()), cpu_seconds(broker.pid()));
    let start = Instant::now();
    firehose_from(rt, &client, "e2e-relay", base, 0, n);
    wait_until(DRAIN_LIMIT, || sub.count() >= n);
    r.relay_cpu_s = cpu_seconds(relay.pid()) - c0;
    r.relay_broker_cpu_s = cpu_seconds(broker.pid()) - b0;
    let got = sub.take().got;
    r.relay_received = got.len();
    r.relay_wall_s = got
        .last()
        .map_or(f64::NAN, |g| g.at.duration_since(start).as_secs_f64());
    r.relay_rate = steady_rate(&got.iter().map(|g| g.at).collect::<Vec<_>>());
    let m = plan.noop_paced;
    let sent = paced(rt, &client, "e2e-relay", base, n, m);
    wait_until(Duration::from_secs(10), || sub.count() >= m);
    r.relay_lat_ms = latencies(&sub.take().got, &sent, base, n);
    r.relay_hwm_kib = status_kib(relay.pid(), "VmHWM");
    let _ = rt.block_on(client.disconnect());
    relay.stop(Duration::from_secs(2));
}

/// The same paced run and firehose through `benches/python/lts_subscriber.py`.
fn python_run(rt: &Runtime, python: &Path, dir: &Path, port: u16, plan: &Plan) -> PyReport {
    let mut py = PyReport::default();
    let log = dir.join("python.log");
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("benches/python/lts_subscriber.py");
    let child = Command::new(python)
        .arg(&script)
        .args(["--port", &port.to_string()])
        .args(["--in-prefix", "e2e-py", "--out-prefix", "eqwatch-py/bench"])
        .args(["--steam-ratio", "0.36"])
        .stdout(Stdio::null())
        .stderr(Stdio::from(
            std::fs::File::create(&log).expect("python log file"),
        ))
        .spawn()
        .expect("the Python interpreter");
    let mut proc = Proc { child };
    let base = now_ms() - 1_000_000;
    let results = Subscriber::start(
        rt,
        port,
        &[
            "eqwatch-py/bench/+/result".to_string(),
            "eqwatch-py/bench/status".to_string(),
        ],
        Keep::Results { base_ms: base },
    );
    results.wait_subscribed();
    if !wait_until(Duration::from_secs(30), || {
        results.inbox.lock().unwrap().online
    }) {
        eprintln!(
            "e2e: the Python subscriber never said online (see {}); skipped",
            log.display()
        );
        return py;
    }
    let client = publisher(rt, port);
    rt.block_on(async {
        for i in 0..REACTORS {
            let id = reactor_id(i);
            let ts = base - 1_000;
            for (topic, payload) in [
                (format!("e2e-py/{id}/ti"), scalar(ts, 220.0, "degC")),
                (format!("e2e-py/{id}/pi"), scalar(ts, 29.0, "barg")),
            ] {
                let _ = client
                    .publish(topic, QoS::AtLeastOnce, false, payload)
                    .await;
            }
        }
    });
    let m = plan.paced;
    eprintln!(
        "e2e: 5/5 Python subscriber: {m} analyses at {PACED_RATE}/s, then {} as fast as possible",
        plan.firehose
    );
    let sent = paced(rt, &client, "e2e-py", base, 0, m);
    py.lat_sent = sent.len();
    wait_until(Duration::from_secs(60), || results.count() >= m);
    let inbox = results.take();
    py.mismatched += inbox.mismatched;
    py.lat_ms = latencies(&inbox.got, &sent, base, 0);
    let n = plan.firehose;
    py.sent = n;
    let c0 = cpu_seconds(proc.pid());
    let start = Instant::now();
    firehose_from(rt, &client, "e2e-py", base, m, n);
    // Until every result is in, or none has come for a while (then the table says how
    // many arrived).
    let mut last = (0, Instant::now());
    wait_until(DRAIN_LIMIT, || {
        let c = results.count();
        if c != last.0 {
            last = (c, Instant::now());
        }
        c >= n || last.1.elapsed() > Duration::from_secs(10)
    });
    py.cpu_s = cpu_seconds(proc.pid()) - c0;
    py.hwm_kib = status_kib(proc.pid(), "VmHWM");
    let inbox = results.take();
    py.mismatched += inbox.mismatched;
    let got: Vec<Got> = inbox
        .got
        .into_iter()
        .filter(|g| g.analysis_ts.is_some_and(|ts| ts >= base + m as i64))
        .collect();
    py.received = got.len();
    py.wall_s = got
        .last()
        .map_or(f64::NAN, |g| g.at.duration_since(start).as_secs_f64());
    py.rate = steady_rate(&got.iter().map(|g| g.at).collect::<Vec<_>>());
    let _ = rt.block_on(client.disconnect());
    proc.stop(Duration::from_secs(5));
    let _ = std::fs::copy(&log, target_dir().join("e2e-python.log"));
    py
}
