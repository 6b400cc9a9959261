//! `eqwatch demo`: the invented Brackwater Ammonia Works (train 1) in compressed time.
//! An embedded broker (or `--broker URL`), a drop-out proxy between the daemon and the
//! broker, the simulated plant publishing instrument readings, the daemon on
//! `config/demo-plant.toml`, and a live table of the retained results.

use std::collections::BTreeMap;
use std::io::{IsTerminal, Write};
use std::net::{SocketAddr, ToSocketAddrs};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

use rumqttc::{AsyncClient, Event, Incoming, MqttOptions, QoS};
use serde_json::Value;
use tokio_util::sync::CancellationToken;

use super::proxy::DropoutProxy;
use super::{Clock, now_ms};
use crate::cli::CliError;
use crate::sim::Plant;

/// The reference configuration of the demo plant (compiled in, so the demo runs from any folder).
pub const DEMO_CONFIG: &str = include_str!("../../config/demo-plant.toml");

fn input<E: std::fmt::Display>(what: &str) -> impl Fn(E) -> CliError + '_ {
    move |e| CliError::Input(format!("{what}: {e}"))
}

fn internal<E: std::fmt::Display>(what: &str) -> impl Fn(E) -> CliError + '_ {
    move |e| CliError::Internal(format!("{what}: {e}"))
}

/// `mqtt://host:port` to a socket address.
fn broker_addr(url: &str) -> Result<SocketAddr, CliError> {
    let rest = url.trim().strip_prefix("mqtt://").ok_or_else(|| {
        CliError::Input(format!(
            "--broker `{url}`: the demo takes mqtt://host:port (plain TCP)"
        ))
    })?;
    let rest = rest.trim_end_matches('/');
    let with_port = if rest.contains(':') {
        rest.to_string()
    } else {
        format!("{rest}:1883")
    };
    with_port
        .to_socket_addrs()
        .map_err(input("--broker"))?
        .next()
        .ok_or_else(|| CliError::Input(format!("--broker `{url}` does not resolve")))
}

/// Latest result per reactor, as the table shows it.
type Latest = Arc<Mutex<BTreeMap<String, (Value, u64)>>>;

fn watch(rt_client: (AsyncClient, rumqttc::EventLoop), filter: String, latest: Latest) {
    let (client, mut ev) = rt_client;
    tokio::spawn(async move {
        loop {
            match ev.poll().await {
                Ok(Event::Incoming(Incoming::ConnAck(_))) => {
                    let _ = client.subscribe(filter.clone(), QoS::AtLeastOnce).await;
                }
                Ok(Event::Incoming(Incoming::Publish(p))) => {
                    if let Ok(v) = serde_json::from_slice::<Value>(&p.payload) {
                        if let Some(id) = v["reactor"].as_str() {
                            let mut l = latest.lock().unwrap_or_else(|e| e.into_inner());
                            let n = l.get(id).map_or(0, |(_, n)| *n) + 1;
                            l.insert(id.to_string(), (v, n));
                        }
                    }
                }
                Ok(_) => {}
                Err(_) => tokio::time::sleep(Duration::from_millis(200)).await,
            }
        }
    });
}

fn fmt_opt(v: &Value, digits: usize) -> String {
    v.as_f64().map_or("-".into(), |x| format!("{x:.digits$}"))
}

fn table(latest: &Latest, sim_s: f64, link_up: bool) -> String {
    let l = latest.lock().unwrap_or_else(|e| e.into_inner());
    let mut s = String::new();
    s.push_str(&format!(
        "Brackwater Ammonia Works, train 1 (simulated)   plant time +{:>3.0} min   broker link {}\n",
        sim_s / 60.0,
        if link_up { "up" } else { "DOWN (simulated drop-out)" }
    ));
    s.push_str(&format!(
        "{:<6} {:>10} {:>7} {:>9} {:>9}  {:<9} {}\n",
        "unit", "approach K", "± K", "Q/K", "T degC", "quality", "reasons"
    ));
    for id in ["ref1", "hts1", "lts1", "mth1", "amc1"] {
        match l.get(id) {
            None => s.push_str(&format!("{id:<6} {:>10}\n", "waiting")),
            Some((v, _)) => {
                let reasons: Vec<&str> = v["reasons"]
                    .as_array()
                    .map(|a| {
                        a.iter()
                            .filter(|r| r["severity"] != "good")
                            .filter_map(|r| r["code"].as_str())
                            .collect()
                    })
                    .unwrap_or_default();
                let t_c = v["temperature_k"]
                    .as_f64()
                    .map_or("-".into(), |t| format!("{:.1}", t - 273.15));
                s.push_str(&format!(
                    "{id:<6} {:>10} {:>7} {:>9} {:>9}  {:<9} {}\n",
                    fmt_opt(&v["approach_k"], 2),
                    fmt_opt(&v["approach_uncertainty_k"], 2),
                    fmt_opt(&v["q_over_k"], 4),
                    t_c,
                    v["quality"].as_str().unwrap_or("-"),
                    if reasons.is_empty() {
                        "-".to_string()
                    } else {
                        reasons.join(", ")
                    }
                ));
            }
        }
    }
    s
}

/// Runs the demo for `duration` (wall clock) at `speed` simulated seconds per second.
pub async fn run(speed: f64, duration: &str, broker: Option<String>) -> Result<(), CliError> {
    if !(speed.is_finite() && speed > 0.0 && speed <= 3600.0) {
        return Err(CliError::Input(
            "--speed must be above 0 and at most 3600 (simulated seconds per second)".into(),
        ));
    }
    let duration = crate::config::parse_duration(duration).map_err(input("--duration"))?;
    let workdir = std::env::temp_dir().join(format!("eqwatch-demo-{}", std::process::id()));
    std::fs::create_dir_all(&workdir).map_err(internal("demo folder"))?;
    let mut settings = crate::config::from_str(DEMO_CONFIG, &workdir)
        .map_err(|e| CliError::Internal(format!("demo configuration: {e}")))?;
    settings.http_listen = None;

    // The broker: embedded unless one is given.
    #[cfg(feature = "demo-broker")]
    let mut _embedded = None;
    let upstream = match &broker {
        Some(url) => broker_addr(url)?,
        None => {
            #[cfg(feature = "demo-broker")]
            {
                let b = super::broker::start_embedded_broker(super::broker::free_port())
                    .map_err(internal("embedded broker"))?;
                let a = b.addr();
                _embedded = Some(b);
                a
            }
            #[cfg(not(feature = "demo-broker"))]
            {
                return Err(CliError::Input("this build has no embedded broker (feature demo-broker); give --broker mqtt://host:port".into()));
            }
        }
    };
    let proxy = DropoutProxy::start(0, upstream)
        .await
        .map_err(internal("drop-out proxy"))?;
    settings.broker.host = "127.0.0.1".into();
    settings.broker.port = proxy.port();
    settings.broker.tls = false;
    settings.broker.reconnect_max = Duration::from_secs(2);
    let prefix = settings.topic_prefix.clone();
    println!("{}", crate::sim::SCENARIO);
    println!(
        "broker {upstream} ({}), daemon through a drop-out proxy on 127.0.0.1:{}, speed x{speed}, {} s; journal in {}",
        if broker.is_some() {
            "given"
        } else {
            "embedded"
        },
        proxy.port(),
        duration.as_secs(),
        workdir.join("var/journal").display()
    );

    // Compressed plant time drives the daemon's clock too, so ages and lags are in plant time.
    let start_wall = Instant::now();
    let start_ms = now_ms();
    let clock: Clock =
        Arc::new(move || start_ms + (start_wall.elapsed().as_secs_f64() * speed * 1000.0) as i64);
    let cancel = CancellationToken::new();
    let settings = Arc::new(settings);
    let daemon = tokio::spawn(super::run(settings.clone(), cancel.clone(), clock.clone()));

    // The simulated plant publishes straight to the broker.
    let mut o = MqttOptions::new(
        format!("baw1-plant-sim-{}", std::process::id()),
        upstream.ip().to_string(),
        upstream.port(),
    );
    o.set_keep_alive(Duration::from_secs(10));
    o.set_max_packet_size(1 << 20, 1 << 20);
    let (sim_client, mut sim_ev) = AsyncClient::new(o, 1024);
    tokio::spawn(async move {
        loop {
            if sim_ev.poll().await.is_err() {
                tokio::time::sleep(Duration::from_millis(200)).await;
            }
        }
    });
    let mut o = MqttOptions::new(
        format!("baw1-demo-console-{}", std::process::id()),
        upstream.ip().to_string(),
        upstream.port(),
    );
    o.set_keep_alive(Duration::from_secs(10));
    o.set_max_packet_size(1 << 20, 1 << 20);
    let latest: Latest = Arc::new(Mutex::new(BTreeMap::new()));
    watch(
        AsyncClient::new(o, 64),
        format!("{prefix}/+/result"),
        latest.clone(),
    );

    let mut plant = Plant::new(20_261_201, start_ms);
    let tty = std::io::stdout().is_terminal();
    // One broker drop-out of about 4 simulated minutes (between 1 and 8 s of wall time),
    // early enough that several analyses follow it.
    let dropout = (
        duration.as_secs_f64() * 0.4,
        (240.0 / speed).clamp(1.0, 8.0),
    );
    let mut link_up = true;
    let mut last_sim = 0.0;
    let mut last_draw = Instant::now() - Duration::from_secs(60);
    let mut drawn_lines = 0usize;
    let mut tick = tokio::time::interval(Duration::from_millis(100));
    while start_wall.elapsed() < duration {
        tick.tick().await;
        let wall = start_wall.elapsed().as_secs_f64();
        let sim_s = wall * speed;
        for m in plant.step(sim_s) {
            let _ = sim_client
                .publish(m.topic, QoS::AtLeastOnce, m.retain, m.payload)
                .await;
        }
        let mut notes = Vec::new();
        for e in plant.events_between(last_sim, sim_s) {
            notes.push(format!(
                "+{:.0} min {}: {}",
                e.at_s / 60.0,
                e.reactor,
                e.description
            ));
        }
        last_sim = sim_s;
        let want_up = !(wall >= dropout.0 && wall < dropout.0 + dropout.1);
        if want_up != link_up {
            proxy.set_up(want_up);
            link_up = want_up;
            notes.push(if want_up {
                "broker link restored: the daemon reconnects and sends what it journaled meanwhile (marked late)".into()
            } else {
                format!("broker link cut for {:.0} s (simulated drop-out): results keep being computed and journaled", dropout.1)
            });
        }
        let redraw = if tty {
            last_draw.elapsed() >= Duration::from_millis(500)
        } else {
            last_draw.elapsed() >= Duration::from_secs(10)
        };
        if !notes.is_empty() || redraw {
            let mut out = std::io::stdout().lock();
            if tty && drawn_lines > 0 {
                let _ = write!(out, "\x1b[{drawn_lines}A\x1b[J");
            }
            for n in &notes {
                let _ = writeln!(out, "  * {n}");
            }
            if tty || redraw {
                let t = table(&latest, sim_s, link_up);
                drawn_lines = t.lines().count();
                let _ = write!(out, "{t}");
                last_draw = Instant::now();
            } else {
                drawn_lines = 0;
            }
            let _ = out.flush();
        }
    }
    proxy.set_up(true);
    println!("stopping the daemon (delivering what is journaled, then offline) ...");
    cancel.cancel();
    match tokio::time::timeout(Duration::from_secs(30), daemon).await {
        Ok(Ok(Ok(()))) => {}
        Ok(Ok(Err(e))) => return Err(CliError::Internal(format!("daemon: {e}"))),
        Ok(Err(e)) => return Err(CliError::Internal(format!("daemon task: {e}"))),
        Err(_) => return Err(CliError::Internal("daemon did not stop within 30 s".into())),
    }
    tokio::time::sleep(Duration::from_millis(300)).await;
    let l = latest.lock().unwrap_or_else(|e| e.into_inner());
    println!(
        "\nsummary after {:.0} min of plant time:",
        start_wall.elapsed().as_secs_f64() * speed / 60.0
    );
    println!(
        "{:<6} {:>8} {:>12} {:<10}",
        "unit", "results", "approach K", "quality"
    );
    for id in ["ref1", "hts1", "lts1", "mth1", "amc1"] {
        match l.get(id) {
            Some((v, n)) => println!(
                "{id:<6} {n:>8} {:>12} {:<10}",
                fmt_opt(&v["approach_k"], 2),
                v["quality"].as_str().unwrap_or("-")
            ),
            None => println!("{id:<6} {:>8} {:>12} {:<10}", 0, "-", "no result"),
        }
    }
    println!(
        "retained results stay on {prefix}/<unit>/result; status on {prefix}/status (offline now)."
    );
    println!("advisory figures only: not a safety function.");
    Ok(())
}
