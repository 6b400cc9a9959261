//! Entry points for the fuzz targets in `fuzz/` (feature `fuzzing`, run by
//! `scripts/fuzz.sh`): each takes arbitrary bytes and must return without panicking.
//! They use the real front doors (the pipeline's message path, the configuration
//! parser, replay), on the invented demo plant's configuration.
//!
//! May use: `config`, `pipeline`, `replay`, `wire` (the Sparkplug consumer). Not the
//! daemon.

use std::cell::RefCell;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use crate::config::Settings;
use crate::pipeline::metrics::Metrics;
use crate::pipeline::{Engine, RawInput};

/// The demo plant's configuration folder (species files and paths resolve from it).
fn config_dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("config")
}

fn demo_settings() -> Settings {
    let text = include_str!("../config/demo-plant.toml");
    match crate::config::from_str(text, &config_dir()) {
        Ok(s) => s,
        Err(e) => panic!("the demo configuration must be valid: {e}"),
    }
}

thread_local! {
    /// One engine per fuzzing thread, fed message after message (state carries over,
    /// as in the daemon), with its topics.
    static ENGINE: RefCell<Option<(Engine, Vec<String>, i64)>> = const { RefCell::new(None) };
}

/// One MQTT message: the first byte picks the topic (the demo plant's input and command
/// topics, or one that no route takes), the next two move the clock, the rest is the
/// payload.
pub fn input_message(bytes: &[u8]) {
    ENGINE.with(|cell| {
        let mut slot = cell.borrow_mut();
        let (engine, topics, now) = slot.get_or_insert_with(|| {
            let settings = demo_settings();
            let ids: Vec<String> = settings
                .reactors
                .iter()
                .map(|r| r.spec.id.clone())
                .collect();
            let metrics = Arc::new(Metrics::new(&ids));
            let engine = match Engine::new(Arc::new(settings), metrics) {
                Ok(e) => e,
                Err(e) => panic!("the demo plant's engine: {e}"),
            };
            let mut topics = engine.subscriptions();
            topics.push("baw1/nowhere".into());
            // 2026-12-01T00:00:00Z.
            (engine, topics, 1_796_083_200_000)
        });
        let (head, payload) = bytes.split_at(bytes.len().min(3));
        let pick = usize::from(head.first().copied().unwrap_or(0));
        let step = head
            .get(1..3)
            .map_or(0, |b| i64::from(u16::from_le_bytes([b[0], b[1]])));
        *now += step * 1000;
        let raw = RawInput {
            topic: topics[pick % topics.len()].clone(),
            payload: payload.to_vec(),
            arrival_ms: *now,
        };
        let mut out = Vec::new();
        engine.message(&raw, *now, &mut out);
        engine.tick(*now, &mut out);
    });
}

/// A configuration file's text (lossy UTF-8), validated.
pub fn config_text(bytes: &[u8]) {
    let _ = crate::config::from_str(&String::from_utf8_lossy(bytes), &config_dir());
}

/// A history file for replay: the bytes after a header with the demo HTS's
/// columns, run through the replay command (temporary files).
pub fn history_rows(bytes: &[u8]) {
    let Ok(dir) = tempfile_dir() else { return };
    let input = dir.join("history.csv");
    let mut text = b"time,BAW1-TI-205,BAW1-PI-202,BAW1-AI-201.H2,BAW1-AI-201.N2,BAW1-AI-201.CO,BAW1-AI-201.CO2,BAW1-AI-201.CH4,BAW1-AI-201.Ar\n".to_vec();
    text.extend_from_slice(bytes);
    if std::fs::write(&input, text).is_err() {
        return;
    }
    let config = config_dir().join("demo-plant.toml");
    let args = crate::replay::ReplayArgs {
        config: &config,
        input: &input,
        out: None,
        format: crate::replay::OutputFormat::JsonLines,
        plot_dir: None,
        plot_tz: crate::plot::TimeZone::UTC,
        threads: Some(1),
    };
    let _ = crate::replay::command(&args);
    let _ = std::fs::remove_dir_all(&dir);
}

/// A fresh folder under the system's temporary folder, per call.
fn tempfile_dir() -> std::io::Result<PathBuf> {
    use std::sync::atomic::{AtomicU64, Ordering};
    static N: AtomicU64 = AtomicU64::new(0);
    let dir = std::env::temp_dir().join(format!(
        "eqwatch-fuzz-{}-{}",
        std::process::id(),
        N.fetch_add(1, Ordering::Relaxed)
    ));
    std::fs::create_dir_all(&dir)?;
    Ok(dir)
}

#[cfg(feature = "sparkplug")]
thread_local! {
    /// One Sparkplug consumer per fuzzing thread (births, aliases and seq carry over).
    static SPARKPLUG: RefCell<(crate::wire::sparkplug::Consumer, i64)> = RefCell::new((
        crate::wire::sparkplug::Consumer::new(
            &["spb:G1/EN1/AH1:TI-305A", "spb:G1/EN1:PI-302"]
                .iter()
                .filter_map(|t| crate::config::SpbRef::parse(t)?.ok())
                .collect::<Vec<_>>(),
            2000,
        ),
        1_796_083_200_000,
    ));
}

/// One Sparkplug B message: the first byte picks the message type (node or device of
/// the one named edge node), the second moves the clock, the rest is the payload.
#[cfg(feature = "sparkplug")]
pub fn sparkplug_message(bytes: &[u8]) {
    const KINDS: [&str; 8] = [
        "NBIRTH", "NDEATH", "NDATA", "NCMD", "DBIRTH", "DDEATH", "DDATA", "DCMD",
    ];
    let (Some(&k), Some(&dt)) = (bytes.first(), bytes.get(1)) else {
        return;
    };
    let kind = KINDS[usize::from(k) % KINDS.len()];
    let topic = if usize::from(k) % KINDS.len() < 4 {
        format!("spBv1.0/G1/{kind}/EN1")
    } else {
        format!("spBv1.0/G1/{kind}/EN1/AH1")
    };
    SPARKPLUG.with(|cell| {
        let mut slot = cell.borrow_mut();
        slot.1 += i64::from(dt) * 50;
        let now = slot.1;
        let _ = slot.0.message(&topic, &bytes[2..], now);
        let _ = slot.0.tick(now);
    });
}
