//! Soak of `eqwatch run` (a measurement tool: it prints figures; it fails only when a
//! journaled result never reached the subscriber). Run with `scripts/soak.sh`
//! (`cargo bench --bench soak`); not part of `scripts/test.sh`.
//!
//! The invented demo plant (config/demo-plant.toml and its simulator) at high speed
//! (EQWATCH_SOAK_SPEED simulated seconds per second, default 1200) for
//! EQWATCH_SOAK_SECS (default 600 s) of wall time, through a real mosquitto with
//! persistence that is stopped and restarted every 30 s (SIGTERM: a broker that is
//! SIGKILLed loses what it had acknowledged but not yet saved, which no client can get
//! back), while the daemon itself is SIGKILLed twice (at a third and two thirds of the
//! run) and started again on the same journal.
//!
//! The plant's clock runs from `now - speed × duration` so that every reading is in the
//! past of the daemon's wall clock (`[timestamps] max_behind` is widened to allow it).
//!
//! Figures: results computed (the daemon's `eqwatch_evaluations_total`, summed over its
//! lives; for a life ended by SIGKILL, the last reading before the kill, so a lower
//! bound), results journaled (result records in the journal files at the end) and
//! results received (distinct `(topic, seq)` at a persistent-session subscriber), with
//! duplicates; the daemon's RSS after the first 30 s and at the end.
//!
//! Under `cargo test --all-targets` (no `--bench` argument) this does nothing.

#[path = "../tests/support/mod.rs"]
mod support;

use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

use eqwatch::demo::sim::Plant;

fn main() {
    if !std::env::args().any(|a| a == "--bench") {
        return;
    }
    let secs: u64 = env_or("EQWATCH_SOAK_SECS", 600);
    let speed: f64 = env_or("EQWATCH_SOAK_SPEED", 1200.0);
    let report = soak(Duration::from_secs(secs), speed);
    println!("{report}");
    let out = target_dir().join("soak.txt");
    let _ = std::fs::write(&out, &report);
    println!("(written to {})", out.display());
    if report.contains("MISSING") {
        std::process::exit(1);
    }
}

fn env_or<T: std::str::FromStr>(key: &str, default: T) -> T {
    std::env::var(key)
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(default)
}

fn target_dir() -> PathBuf {
    std::env::var_os("CARGO_TARGET_DIR")
        .map(PathBuf::from)
        .unwrap_or_else(|| Path::new(env!("CARGO_MANIFEST_DIR")).join("target"))
}

/// Mosquitto with persistence in `dir` on `port` (restartable on the same database):
/// saved every 5 s, per-client queues unbounded.
fn broker(dir: &Path, port: u16) -> Child {
    support::persistent_broker(dir, port, "autosave_interval 5\nmax_queued_messages 0\n")
}

fn stop_broker(b: Child, port: u16) {
    support::stop_broker(b, port);
}

fn daemon(config: &Path, http: u16, life: usize) -> Child {
    let log = std::fs::File::create(config.with_extension(format!("{life}.log"))).expect("log");
    let bin = std::env::var_os("EQWATCH_BIN")
        .map(PathBuf::from)
        .unwrap_or_else(|| PathBuf::from(env!("CARGO_BIN_EXE_eqwatch")));
    let child = Command::new(bin)
        .args(["run", "--config"])
        .arg(config)
        .args(["--log-level", "warn"])
        .stdout(Stdio::null())
        .stderr(Stdio::from(log))
        .spawn()
        .expect("eqwatch binary");
    assert!(support::wait_port(http, true, Duration::from_secs(15)));
    child
}

fn evaluations(http: u16) -> Option<f64> {
    let text = support::http_get(http, "/metrics");
    let v: f64 = text
        .lines()
        .filter(|l| l.starts_with("eqwatch_evaluations_total{"))
        .filter_map(|l| l.rsplit_once(' ')?.1.trim().parse::<f64>().ok())
        .sum();
    (!text.is_empty()).then_some(v)
}

fn rss_kib(pid: u32) -> u64 {
    std::fs::read_to_string(format!("/proc/{pid}/status"))
        .ok()
        .and_then(|s| {
            s.lines()
                .find_map(|l| l.strip_prefix("VmRSS:"))
                .and_then(|v| v.split_whitespace().next()?.parse().ok())
        })
        .unwrap_or(0)
}

/// Result records in the journal: `(topic, seq)`.
fn journaled(dir: &Path) -> BTreeSet<(String, u64)> {
    let mut out = BTreeSet::new();
    for e in std::fs::read_dir(dir).into_iter().flatten().flatten() {
        let name = e.file_name().to_string_lossy().to_string();
        if !(name.starts_with("eqwatch-") && name.ends_with(".jsonl")) {
            continue;
        }
        for line in std::fs::read_to_string(e.path())
            .unwrap_or_default()
            .lines()
        {
            let Ok(v) = serde_json::from_str::<serde_json::Value>(line) else {
                continue;
            };
            let (Some(t), Some(s)) = (v["topic"].as_str(), v["seq"].as_u64()) else {
                continue;
            };
            if t.ends_with("/result") {
                out.insert((t.to_string(), s));
            }
        }
    }
    out
}

fn received(got: &support::Received) -> BTreeMap<(String, u64), usize> {
    let mut m = BTreeMap::new();
    for (t, pl, _) in got.lock().unwrap().iter() {
        if let Some(seq) = serde_json::from_str::<serde_json::Value>(pl)
            .ok()
            .and_then(|v| v["seq"].as_u64())
        {
            *m.entry((t.clone(), seq)).or_insert(0) += 1;
        }
    }
    m
}

fn soak(duration: Duration, speed: f64) -> String {
    let rt = support::runtime();
    let dir = tempfile::tempdir().expect("temp dir");
    let port = support::free_port();
    let http = support::free_port();
    let mut mosquitto = Some(broker(dir.path(), port));
    let demo = include_str!("../config/demo-plant.toml");
    let config = dir.path().join("plant.toml");
    let text = demo
        .replacen(
            "url = \"mqtt://127.0.0.1:1883\"",
            &format!("url = \"mqtt://127.0.0.1:{port}\""),
            1,
        )
        .replacen(
            "listen = \"127.0.0.1:9873\"",
            &format!("listen = \"127.0.0.1:{http}\""),
            1,
        )
        .replacen("dir = \"var/journal\"", "dir = \"journal\"", 1)
        .replacen("# [timestamps]", "[timestamps]\nmax_behind = \"60 d\"", 1);
    std::fs::write(&config, text).expect("write config");
    let got = support::collector_kept(&rt, port, &["eqwatch/baw1/+/result"], "soak-historian");
    let publisher = support::Publisher::new(&rt, port);

    let wall_start_ms = eqwatch::daemon::now_ms();
    let sim_start_ms = wall_start_ms - (duration.as_secs_f64() * speed * 1000.0) as i64;
    let mut plant = Plant::new(20_261_202, sim_start_ms);
    let mut life = 0;
    let mut d = daemon(&config, http, life);
    let start = Instant::now();
    let kills = [duration / 3, duration * 2 / 3];
    let mut killed = 0;
    let mut computed = 0.0;
    let mut last_eval = 0.0;
    let mut rss_start = 0;
    let mut next_restart = Duration::from_secs(30);
    let mut broker_restarts = 0;
    let mut published = 0u64;
    while start.elapsed() < duration {
        let t = start.elapsed();
        for m in plant.step(t.as_secs_f64() * speed) {
            publisher.publish(&rt, &m.topic, &m.payload);
            published += 1;
        }
        if let Some(v) = evaluations(http) {
            last_eval = v;
        }
        if rss_start == 0 && t >= Duration::from_secs(30) {
            rss_start = rss_kib(d.id());
        }
        if killed < kills.len() && t >= kills[killed] {
            let _ = d.kill();
            let _ = d.wait();
            computed += last_eval;
            last_eval = 0.0;
            killed += 1;
            life += 1;
            support::wait_port(http, false, Duration::from_secs(5));
            d = daemon(&config, http, life);
        }
        if t >= next_restart {
            if let Some(b) = mosquitto.take() {
                stop_broker(b, port);
            }
            mosquitto = Some(broker(dir.path(), port));
            broker_restarts += 1;
            next_restart += Duration::from_secs(30);
        }
        std::thread::sleep(Duration::from_millis(100));
    }
    // Let the daemon catch up with what was published, then stop it cleanly.
    std::thread::sleep(Duration::from_secs(10));
    let rss_end = rss_kib(d.id());
    if let Some(v) = evaluations(http) {
        last_eval = v;
    }
    let _ = Command::new("kill")
        .args(["-TERM", &d.id().to_string()])
        .status();
    let _ = d.wait();
    computed += last_eval;
    let journal = journaled(&dir.path().join("journal"));
    let until = Instant::now() + Duration::from_secs(60);
    while Instant::now() < until {
        let recv = received(&got);
        if journal.iter().all(|k| recv.contains_key(k)) {
            break;
        }
        std::thread::sleep(Duration::from_secs(1));
    }
    let recv = received(&got);
    let missing = journal.iter().filter(|k| !recv.contains_key(*k)).count();
    let duplicates: usize = recv.values().map(|n| n - 1).sum();
    if let Some(b) = mosquitto.take() {
        stop_broker(b, port);
    }
    let mut r = String::new();
    use std::fmt::Write as _;
    let _ = writeln!(
        r,
        "soak: demo plant x{speed} for {} s, {published} readings published",
        duration.as_secs()
    );
    let _ = writeln!(
        r,
        "  broker restarts (SIGTERM, persistence)  {broker_restarts}"
    );
    let _ = writeln!(r, "  daemon SIGKILLs                         {killed}");
    let _ = writeln!(r, "  results computed (lower bound)          {computed:.0}");
    let _ = writeln!(
        r,
        "  results journaled                       {}",
        journal.len()
    );
    let _ = writeln!(
        r,
        "  results received (distinct seq)         {}",
        recv.len()
    );
    let _ = writeln!(r, "  duplicates received (QoS 1)             {duplicates}");
    let _ = writeln!(
        r,
        "  journaled but not received              {missing}{}",
        if missing > 0 { "  MISSING" } else { "" }
    );
    let _ = writeln!(
        r,
        "  daemon RSS after 30 s / at the end      {:.1} / {:.1} MiB",
        rss_start as f64 / 1024.0,
        rss_end as f64 / 1024.0
    );
    r
}
