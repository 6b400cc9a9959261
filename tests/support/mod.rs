//! Test harness: a real mosquitto on a free loopback port (Debian package `mosquitto`),
//! the eqwatch binary as a child process, and an MQTT collector.

#![allow(dead_code)]

use std::io::Write;
use std::net::{SocketAddr, TcpListener, TcpStream};
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

use rumqttc::{AsyncClient, Event, Incoming, MqttOptions, QoS};

pub fn free_port() -> u16 {
    TcpListener::bind("127.0.0.1:0")
        .and_then(|l| l.local_addr())
        .map(|a| a.port())
        .expect("a free loopback port")
}

pub fn mosquitto_binary() -> PathBuf {
    for p in [
        "/usr/sbin/mosquitto",
        "/usr/bin/mosquitto",
        "/usr/local/sbin/mosquitto",
    ] {
        if Path::new(p).exists() {
            return PathBuf::from(p);
        }
    }
    PathBuf::from("mosquitto")
}

pub fn wait_port(port: u16, up: bool, within: Duration) -> bool {
    let addr: SocketAddr = ([127, 0, 0, 1], port).into();
    let until = Instant::now() + within;
    while Instant::now() < until {
        let ok = TcpStream::connect_timeout(&addr, Duration::from_millis(100)).is_ok();
        if ok == up {
            return true;
        }
        std::thread::sleep(Duration::from_millis(50));
    }
    false
}

/// A mosquitto process; killed when dropped.
pub struct Mosquitto {
    child: Option<Child>,
    pub port: u16,
    dir: tempfile::TempDir,
}

impl Mosquitto {
    pub fn start() -> Self {
        Self::start_on(free_port())
    }

    pub fn start_on(port: u16) -> Self {
        let dir = tempfile::tempdir().expect("temp dir");
        let conf = dir.path().join("mosquitto.conf");
        let mut f = std::fs::File::create(&conf).expect("write mosquitto.conf");
        // Mosquitto 2 drops privileges unless told to stay root; tests run as root in CI.
        let user = if is_root() { "user root\n" } else { "" };
        write!(f, "listener {port} 127.0.0.1\nallow_anonymous true\npersistence false\nlog_dest none\n{user}").unwrap();
        let child = Command::new(mosquitto_binary())
            .arg("-c")
            .arg(&conf)
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .expect("mosquitto must be installed (scripts/test.sh installs it)");
        assert!(
            wait_port(port, true, Duration::from_secs(10)),
            "mosquitto did not open port {port}"
        );
        Self {
            child: Some(child),
            port,
            dir,
        }
    }

    /// Kills the broker (as a crash would).
    pub fn kill(&mut self) {
        if let Some(mut c) = self.child.take() {
            let _ = c.kill();
            let _ = c.wait();
        }
        wait_port(self.port, false, Duration::from_secs(5));
    }

    pub fn url(&self) -> String {
        format!("mqtt://127.0.0.1:{}", self.port)
    }
}

impl Drop for Mosquitto {
    fn drop(&mut self) {
        self.kill();
    }
}

pub fn is_root() -> bool {
    Command::new("id")
        .arg("-u")
        .output()
        .map(|o| String::from_utf8_lossy(&o.stdout).trim() == "0")
        .unwrap_or(false)
}

/// Mosquitto on `port` with its database in `dir` (saved at a clean stop, so it can be
/// restarted on the same data), plus `extra` configuration lines.
pub fn persistent_broker(dir: &Path, port: u16, extra: &str) -> Child {
    let conf = dir.join("mosquitto.conf");
    let user = if is_root() { "user root\n" } else { "" };
    std::fs::write(
        &conf,
        format!(
            "listener {port} 127.0.0.1\nallow_anonymous true\npersistence true\n\
             persistence_location {}/\nlog_dest none\n{extra}{user}",
            dir.display()
        ),
    )
    .expect("write mosquitto.conf");
    let child = Command::new(mosquitto_binary())
        .arg("-c")
        .arg(&conf)
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .expect("mosquitto (Debian package)");
    assert!(wait_port(port, true, Duration::from_secs(10)));
    child
}

/// A clean stop (SIGTERM: mosquitto writes its database), waited for; whether the port
/// closed.
pub fn stop_broker(mut broker: Child, port: u16) -> bool {
    let _ = Command::new("kill")
        .args(["-TERM", &broker.id().to_string()])
        .status();
    let _ = broker.wait();
    wait_port(port, false, Duration::from_secs(10))
}

/// The eqwatch binary running `run --config`.
pub struct Daemon {
    pub child: Child,
    pub http_port: u16,
}

impl Daemon {
    pub fn start(config: &Path, http_port: u16) -> Self {
        Self::start_env(config, http_port, &[])
    }

    /// [`Daemon::start`] with more environment variables.
    pub fn start_env(config: &Path, http_port: u16, env: &[(&str, &str)]) -> Self {
        let child = Command::new(env!("CARGO_BIN_EXE_eqwatch"))
            .envs(env.iter().copied())
            .args(["run", "--config"])
            .arg(config)
            .args(["--log-level", "info"])
            .stdout(Stdio::null())
            .stderr(Stdio::from(
                std::fs::File::create(config.with_extension("log")).expect("daemon log file"),
            ))
            .spawn()
            .expect("eqwatch binary");
        assert!(
            wait_port(http_port, true, Duration::from_secs(15)),
            "daemon did not open its metrics port"
        );
        Self { child, http_port }
    }

    /// The daemon's process id.
    pub fn pid(&self) -> u32 {
        self.child.id()
    }

    pub fn metrics(&self) -> String {
        http_get(self.http_port, "/metrics")
    }

    /// The value of one metric line (exact name with labels).
    pub fn metric(&self, name: &str) -> f64 {
        let text = self.metrics();
        text.lines()
            .find_map(|l| {
                l.strip_prefix(name)
                    .and_then(|rest| rest.strip_prefix(' '))
                    .and_then(|v| v.trim().parse().ok())
            })
            .unwrap_or(f64::NAN)
    }

    pub fn signal(&self, sig: &str) {
        let _ = Command::new("kill")
            .args([sig, &self.child.id().to_string()])
            .status();
    }

    pub fn wait_exit(&mut self, within: Duration) -> Option<i32> {
        let until = Instant::now() + within;
        while Instant::now() < until {
            if let Ok(Some(st)) = self.child.try_wait() {
                return st.code();
            }
            std::thread::sleep(Duration::from_millis(50));
        }
        None
    }
}

impl Drop for Daemon {
    fn drop(&mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}

pub fn http_get(port: u16, path: &str) -> String {
    use std::io::Read;
    let Ok(mut s) = TcpStream::connect(("127.0.0.1", port)) else {
        return String::new();
    };
    let _ = s.set_read_timeout(Some(Duration::from_secs(5)));
    let request = format!("GET {path} HTTP/1.1\r\nHost: localhost\r\nConnection: close\r\n\r\n");
    let _ = s.write_all(request.as_bytes());
    let mut out = String::new();
    let _ = s.read_to_string(&mut out);
    out.split_once("\r\n\r\n")
        .map(|(_, b)| b.to_string())
        .unwrap_or_default()
}

/// Messages a collector received: (topic, payload text, retained).
pub type Received = Arc<Mutex<Vec<(String, String, bool)>>>;

/// Subscribes to `filters` and keeps everything it receives; resubscribes after every
/// reconnect (the broker may be restarted by the test).
pub fn collector(rt: &tokio::runtime::Runtime, port: u16, filters: &[&str]) -> Received {
    collector_with(rt, port, filters, None, None)
}

/// [`collector`] logged in as `(user, password)`.
pub fn collector_as(
    rt: &tokio::runtime::Runtime,
    port: u16,
    filters: &[&str],
    login: Option<(&str, &str)>,
) -> Received {
    collector_with(rt, port, filters, login, None)
}

/// [`collector`] with a persistent session under `client_id`: a broker that restarts
/// with persistence keeps what arrives for it meanwhile.
pub fn collector_kept(
    rt: &tokio::runtime::Runtime,
    port: u16,
    filters: &[&str],
    client_id: &str,
) -> Received {
    collector_with(rt, port, filters, None, Some(client_id))
}

fn collector_with(
    rt: &tokio::runtime::Runtime,
    port: u16,
    filters: &[&str],
    login: Option<(&str, &str)>,
    kept: Option<&str>,
) -> Received {
    let got: Received = Arc::new(Mutex::new(Vec::new()));
    let g = got.clone();
    let filters: Vec<String> = filters.iter().map(|s| s.to_string()).collect();
    let id = kept.map_or_else(|| format!("collector-{}", free_port()), str::to_string);
    let mut o = MqttOptions::new(id, "127.0.0.1", port);
    o.set_clean_session(kept.is_none());
    if let Some((u, p)) = login {
        o.set_credentials(u, p);
    }
    o.set_keep_alive(Duration::from_secs(5));
    o.set_max_packet_size(1 << 20, 1 << 20);
    let (client, mut ev) = AsyncClient::new(o, 64);
    rt.spawn(async move {
        loop {
            match ev.poll().await {
                Ok(Event::Incoming(Incoming::ConnAck(_))) => {
                    for f in &filters {
                        let _ = client.subscribe(f.clone(), QoS::AtLeastOnce).await;
                    }
                }
                Ok(Event::Incoming(Incoming::Publish(p))) => {
                    g.lock().unwrap().push((
                        p.topic.clone(),
                        String::from_utf8_lossy(&p.payload).to_string(),
                        p.retain,
                    ));
                }
                Ok(_) => {}
                Err(_) => tokio::time::sleep(Duration::from_millis(100)).await,
            }
        }
    });
    got
}

/// A publisher that retries through broker restarts.
pub struct Publisher {
    client: AsyncClient,
}

impl Publisher {
    pub fn new(rt: &tokio::runtime::Runtime, port: u16) -> Self {
        Self::new_as(rt, port, None)
    }

    /// A publisher logged in as `(user, password)`.
    pub fn new_as(rt: &tokio::runtime::Runtime, port: u16, login: Option<(&str, &str)>) -> Self {
        let mut o = MqttOptions::new(format!("publisher-{}", free_port()), "127.0.0.1", port);
        if let Some((u, p)) = login {
            o.set_credentials(u, p);
        }
        o.set_keep_alive(Duration::from_secs(5));
        o.set_max_packet_size(1 << 22, 1 << 22);
        let (client, mut ev) = AsyncClient::new(o, 1024);
        rt.spawn(async move {
            loop {
                if ev.poll().await.is_err() {
                    tokio::time::sleep(Duration::from_millis(100)).await;
                }
            }
        });
        Self { client }
    }

    pub fn publish(&self, rt: &tokio::runtime::Runtime, topic: &str, payload: &str) {
        let c = self.client.clone();
        let (t, p) = (topic.to_string(), payload.to_string());
        rt.block_on(async move { c.publish(t, QoS::AtLeastOnce, false, p).await })
            .expect("queue publish");
    }
}

/// The test plant's full set of readings for one analysis at `ts(0)`: the docs/domain.md §8
/// LTS gas (dry mol%) read at 220 °C, 29 barg, steam ratio 0.36312, the scalars one
/// analyser lag (60 s) before the analysis, on the topics of [`write_lts_plant`].
pub fn publish_lts_set(p: &Publisher, rt: &tokio::runtime::Runtime) {
    publish_lts_set_at(p, rt, 0);
}

/// [`publish_lts_set`] for the analysis at `ts(m)`.
pub fn publish_lts_set_at(p: &Publisher, rt: &tokio::runtime::Runtime, m: i64) {
    let s = |t: i64, v: f64, u: &str| format!(r#"{{"ts":{t},"value":{v},"unit":"{u}"}}"#);
    p.publish(rt, "t/lts1/ti", &s(ts(m) - 60_000, 220.0, "degC"));
    p.publish(rt, "t/lts1/pi", &s(ts(m) - 60_000, 29.0, "barg"));
    p.publish(rt, "t/lts1/fy", &s(ts(m) - 60_000, 0.36312, "mol/mol"));
    p.publish(
        rt,
        "t/lts1/ai",
        &format!(
            r#"{{"ts":{},"values":{{"H2":61.0536,"N2":18.98637,"CO":0.28697,"CO2":19.38096,"CH4":0.2921}},"unit":"mol%"}}"#,
            ts(m)
        ),
    );
}

/// Distinct analysis times among the `lts1` results received (the test plant's prefix).
pub fn lts_analyses(got: &Received) -> std::collections::BTreeSet<String> {
    got.lock()
        .unwrap()
        .iter()
        .filter(|(t, _, _)| t == "eqwatch/test/lts1/result")
        .filter_map(|(_, pl, _)| serde_json::from_str::<serde_json::Value>(pl).ok())
        .filter_map(|v| v.get("analysis_ts").map(|t| t.to_string()))
        .collect()
}

/// Waits until `pred` holds on the received messages.
pub fn wait_for(
    got: &Received,
    within: Duration,
    pred: impl Fn(&[(String, String, bool)]) -> bool,
) -> bool {
    let until = Instant::now() + within;
    while Instant::now() < until {
        // Copy first: the predicate may lock `got` itself.
        let snapshot = got.lock().unwrap().clone();
        if pred(&snapshot) {
            return true;
        }
        std::thread::sleep(Duration::from_millis(50));
    }
    false
}

pub fn runtime() -> tokio::runtime::Runtime {
    tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .expect("tokio runtime")
}

/// Epoch ms of the tests' readings: 2026-12-01T00:00:00Z (POSIX `date -u -d 2026-12-01 +%s`)
/// plus minutes. Fixed instants keep expected timestamps readable; the test plants' analysis
/// max age (10 years) keeps them from turning stale as the calendar moves on.
pub fn ts(minutes: i64) -> i64 {
    1_796_083_200_000 + minutes * 60_000
}

/// Writes `plant.toml` into `dir`: one invented low-temperature shift converter (dry
/// analysis with a measured steam ratio, Moe 1962 K) on the broker at `port`, followed by
/// `extra` (more tables for `lts1`, `[commands]`, ...).
pub fn write_lts_plant(dir: &Path, port: u16, http_port: u16, name: &str, extra: &str) -> PathBuf {
    let text = format!(
        r#"
site = "test"
# The test readings carry fixed timestamps (2026-12-01): keep them inside the clock window.
[timestamps]
max_behind = "36500 d"
[broker]
url = "mqtt://127.0.0.1:{port}"
client_id = "eqwatch-{name}-{http_port}"
keep_alive = "5 s"
reconnect_min = "100 ms"
reconnect_max = "1 s"
[journal]
dir = "journal"
fsync_interval = "100 ms"
[http]
listen = "127.0.0.1:{http_port}"

[reactors.lts1]
name = "LTS"
reactions = [{{ equation = "CO + H2O = CO2 + H2", k_source = "moe-1962" }}]
[reactors.lts1.composition]
tag = "AI-3"
topic = "t/lts1/ai"
unit = "mol%"
basis = "dry"
components = ["H2", "N2", "CO", "CO2", "CH4"]
lag = "60 s"
max_age = "3650 d"
[[reactors.lts1.temperature]]
tag = "TI-3"
topic = "t/lts1/ti"
unit = "degC"
max_age = "5 min"
[reactors.lts1.pressure]
tag = "PI-3"
topic = "t/lts1/pi"
unit = "barg"
max_age = "1 h"
[reactors.lts1.steam_ratio]
tag = "FY-3"
topic = "t/lts1/fy"
max_age = "1 h"
{extra}"#
    );
    let path = dir.join("plant.toml");
    std::fs::write(&path, text).expect("write config");
    path
}

/// A loopback TCP forwarder that holds every chunk for `one_way` before passing it on,
/// in both directions: a round trip through it takes at least twice `one_way`, like a
/// slow radio or satellite link. It counts the connections it has accepted.
pub struct SlowLink {
    pub port: u16,
    accepted: Arc<std::sync::atomic::AtomicUsize>,
}

impl SlowLink {
    pub fn start(upstream: u16, one_way: Duration) -> Self {
        let listener = TcpListener::bind("127.0.0.1:0").expect("bind the slow link");
        let port = listener.local_addr().expect("slow link address").port();
        let accepted = Arc::new(std::sync::atomic::AtomicUsize::new(0));
        let count = accepted.clone();
        std::thread::spawn(move || {
            for client in listener.incoming() {
                let Ok(client) = client else { continue };
                let Ok(server) = TcpStream::connect(("127.0.0.1", upstream)) else {
                    continue;
                };
                count.fetch_add(1, std::sync::atomic::Ordering::SeqCst);
                let _ = client.set_nodelay(true);
                let _ = server.set_nodelay(true);
                let (c2, s2) = (
                    client.try_clone().expect("clone"),
                    server.try_clone().expect("clone"),
                );
                delayed_pump(client, server, one_way);
                delayed_pump(s2, c2, one_way);
            }
        });
        Self { port, accepted }
    }

    pub fn accepted(&self) -> usize {
        self.accepted.load(std::sync::atomic::Ordering::SeqCst)
    }
}

/// Copies `from` to `to`, each chunk delivered `delay` after it was read (order kept).
fn delayed_pump(mut from: TcpStream, mut to: TcpStream, delay: Duration) {
    use std::io::Read;
    let (tx, rx) = std::sync::mpsc::channel::<(Instant, Vec<u8>)>();
    std::thread::spawn(move || {
        let mut buf = vec![0u8; 64 * 1024];
        loop {
            match from.read(&mut buf) {
                Ok(0) | Err(_) => break,
                Ok(n) => {
                    if tx
                        .send((Instant::now() + delay, buf[..n].to_vec()))
                        .is_err()
                    {
                        break;
                    }
                }
            }
        }
        // Dropping `tx` tells the writer the stream ended (after what is queued).
    });
    std::thread::spawn(move || {
        while let Ok((due, bytes)) = rx.recv() {
            let now = Instant::now();
            if due > now {
                std::thread::sleep(due - now);
            }
            if to.write_all(&bytes).is_err() {
                break;
            }
        }
        let _ = to.shutdown(std::net::Shutdown::Write);
    });
}
