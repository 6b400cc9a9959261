//! The shell: MQTT in and out, the journal, metrics over HTTP, signals. The only place
//! tokio and rumqttc appear (rumqttc for the input link; the result link has its own
//! MQTT 3.1.1 client, `mqtt311.rs` and `publink.rs`). The numeric work happens in the pure core
//! ([`crate::monitor`], [`crate::approach`]); this module moves data and owns durability.
//!
//! Tasks and threads:
//! ```text
//! broker ─► input link task (mqtt.rs) ──raw input──► evaluator task
//!                                                   (decode, monitor, encode)
//! broker ◄─ result link task (publink.rs)                  │ results
//!              ▲ records (journaled)                       ▼
//!              └──────────── journal thread (journal.rs, std I/O)
//! ```
//! A result is in the journal before the result link sees it; the link publishes with
//! QoS 1 and tells the journal what the broker acknowledged, so a restart resends the
//! rest. While the result connection is up and [`UNACKED_MAX`] results wait for the
//! broker's acknowledgement, the evaluator takes no input (the input link then stops
//! reading and the broker holds the messages): a flood is evaluated at the pace results
//! are published, so none is lost to the journal's size cap and memory stays bounded.

pub mod http;
pub mod journal;
pub mod mqtt;
pub mod mqtt311;
pub mod notify;
pub mod outbox;
pub mod page;
pub mod publink;
#[cfg(feature = "sparkplug")]
pub mod sparkplug;
pub mod state;

pub use crate::pipeline::{Append, RawInput};

use std::sync::Arc;
use std::sync::atomic::Ordering::Relaxed;
use std::time::{Duration, SystemTime, UNIX_EPOCH};

use tokio::sync::mpsc;
use tokio_util::sync::CancellationToken;
use tracing::{error, info, warn};

use crate::config::Settings;
use crate::pipeline::metrics::Metrics;
use journal::Journal;
use outbox::Outgoing;

/// Milliseconds since the Unix epoch (the shell's one clock).
pub fn now_ms() -> i64 {
    SystemTime::now()
        .duration_since(UNIX_EPOCH)
        .map_or(0, |d| i64::try_from(d.as_millis()).unwrap_or(i64::MAX))
}

/// The shell's clock in epoch milliseconds: the wall clock for `run`, compressed
/// simulated time for the demo. Everything downstream gets time from here.
pub type Clock = Arc<dyn Fn() -> i64 + Send + Sync>;

/// The wall clock.
pub fn wall_clock() -> Clock {
    Arc::new(now_ms)
}

/// Requests waiting for the journal thread at most (each holds one evaluator batch).
const JOURNAL_QUEUE: usize = 8;
/// Journaled results not yet acknowledged by the broker at which the evaluator stops
/// taking input while the result connection is up (well inside the link's in-memory
/// outbox, so a flood needs no read-back from disk) ...
/// 256: four QoS 1 windows of the default 64. 512 held 0.7 MB more results under a flood
/// for no more throughput (benches/e2e.rs, 2026-12-03).
pub const UNACKED_MAX: u64 = 256;
/// ... and at or below which it takes input again (the gap keeps its batches large).
pub const UNACKED_RESUME: u64 = UNACKED_MAX / 2;
/// Inputs waiting for the evaluator at most.
const INPUT_QUEUE: usize = 256;
/// Inputs the evaluator takes per wake-up at most.
const EVALUATOR_BATCH: usize = 64;
/// Batches of journal records (each at most one evaluator batch) waiting for the link
/// at most: bounds the memory a flood can hold between journal and link.
const LINK_QUEUE: usize = 128;

/// Requests to the journal thread.
#[derive(Debug)]
pub enum JournalCmd {
    /// Results to append, in order (a batch per evaluator wake-up).
    Append(Vec<Append>),
    Published {
        seq: u64,
        force: bool,
    },
    ReadAfter {
        after: u64,
        max: usize,
    },
    /// The evaluator has no more results (shutdown).
    Drained,
    /// The watch state to save beside the journal (`state.rs`).
    SaveState(String),
    /// Try again to write results held in memory (sent once a second while any are).
    Retry,
}

/// A copy of a journaled result for the Sparkplug edge node: reactor id, the result
/// JSON with its seq, and whether it is from before this process started (sent as
/// historical).
#[derive(Debug)]
pub struct ResultCopy {
    pub reactor: String,
    pub payload: String,
    pub late: bool,
}

/// Messages from the journal thread to the link.
#[derive(Debug)]
pub enum ToLink {
    /// Journaled records, in sequence order.
    Records(Vec<Outgoing>),
    ReadDone,
    JournalAt(u64),
    Drained,
}

#[derive(Debug, thiserror::Error)]
pub enum DaemonError {
    #[error("journal: {0}")]
    Journal(String),
    #[error("{0}")]
    Config(String),
    #[error("http listener on {addr}: {source}")]
    Http {
        addr: std::net::SocketAddr,
        source: std::io::Error,
    },
    #[error(transparent)]
    Link(#[from] mqtt::LinkError),
}

/// A reload handed to the evaluator, with where to send what it did.
type EngineReload = (
    Arc<Settings>,
    tokio::sync::oneshot::Sender<Result<crate::pipeline::reload::Reloaded, Vec<String>>>,
);

/// The evaluator task's inputs.
struct Evaluator {
    engine: crate::pipeline::Engine,
    rx: mpsc::Receiver<RawInput>,
    journal: mpsc::Sender<JournalCmd>,
    clock: Clock,
    saved: Option<String>,
    metrics: Arc<Metrics>,
    acked: Arc<tokio::sync::Notify>,
    reloads: mpsc::Receiver<EngineReload>,
    /// Copies of the records the live page shows (`page.rs`), when it is served.
    page: Option<page::Tap>,
}

/// Decodes, evaluates and journals until the input channel closes; ticks the watch
/// timers (shelf expiry, data quality, chattering, stale, flood) once a second; applies
/// configuration reloads between batches.
async fn evaluate_loop(ev: Evaluator) {
    let Evaluator {
        mut engine,
        mut rx,
        journal,
        clock,
        saved,
        metrics,
        acked,
        mut reloads,
        page,
    } = ev;
    if let Some(text) = saved {
        restore(&mut engine, &text);
    }
    let mut batch: Vec<Append> = Vec::new();
    engine.states(clock(), &mut batch);
    let mut tick = tokio::time::interval(Duration::from_secs(1));
    tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Delay);
    let mut ticks: u64 = 0;
    let mut hold = false;
    let mut reloads_open = true;
    loop {
        // Wait for the broker while too much is unacknowledged (only while the result
        // connection is up: with the broker away, what came in is still evaluated and
        // journaled).
        let backlog = metrics.backlog();
        hold = metrics.connected.load(Relaxed)
            && if hold {
                backlog > UNACKED_RESUME
            } else {
                backlog >= UNACKED_MAX
            };
        tokio::select! {
            first = rx.recv(), if !hold => {
                let Some(first) = first else { break };
                // Take what is already queued (up to a bound) and journal it in one
                // hand-over: fewer thread wake-ups under load, no waiting when idle.
                let mut next = Some(first);
                let mut taken = 0;
                let now = clock();
                while let Some(raw) = next.take() {
                    taken += 1;
                    if taken < EVALUATOR_BATCH {
                        next = rx.try_recv().ok();
                    }
                    engine.message(&raw, now, &mut batch);
                }
            }
            _ = tick.tick() => {
                engine.tick(clock(), &mut batch);
                ticks += 1;
                metrics.evaluator_ticks.fetch_add(1, Relaxed);
                if metrics.journal_held.load(Relaxed) > 0 {
                    let _ = journal.try_send(JournalCmd::Retry);
                }
                // The run's learned state once a minute (a few KB; the journal thread writes it).
                if ticks.is_multiple_of(STATE_SAVE_TICKS) {
                    let _ = journal.try_send(JournalCmd::SaveState(state::encode(&engine, clock())));
                }
            }
            _ = acked.notified(), if hold => {}
            req = reloads.recv(), if reloads_open => match req {
                None => reloads_open = false,
                Some((new, reply)) => {
                    let _ = reply.send(engine.reload(new, clock(), &mut batch));
                }
            },
        }
        if let Some(tap) = &page {
            tap.offer(&batch);
        }
        if !batch.is_empty()
            && journal
                .send(JournalCmd::Append(std::mem::take(&mut batch)))
                .await
                .is_err()
        {
            error!("journal thread is gone; results cannot be kept");
        }
    }
    let _ = journal
        .send(JournalCmd::SaveState(state::encode(&engine, clock())))
        .await;
    let _ = journal.send(JournalCmd::Drained).await;
}

/// Applies the saved watch state at start-up, saying what was carried over.
fn restore(engine: &mut crate::pipeline::Engine, text: &str) {
    match state::apply(engine, text) {
        Ok(r) => {
            if !r.restored.is_empty() {
                info!(reactors = %r.restored.join(","), "runs carried over from the saved watch state (baselines, statistics, aggregates)");
            }
            if !r.alarms.is_empty() {
                info!(alarms = %r.alarms.join(","), "alert and alarm states carried over (acknowledgements, shelves, out of service)");
            }
            for (id, why) in r.skipped {
                warn!(reactor = %id, reason = %why, "saved watch state not used: a new run starts");
            }
        }
        Err(e) => {
            warn!(error = %e, file = state::STATE_FILE, "saved watch state unreadable: every reactor starts a new run")
        }
    }
}

/// Seconds between saves of the watch state.
const STATE_SAVE_TICKS: u64 = 60;

/// Writes the watch state beside the journal: a temporary file, then a rename, so a
/// crash leaves the old state or the new one, never half of one.
fn save_state(path: &std::path::Path, text: &str) -> std::io::Result<()> {
    let tmp = path.with_extension("json.tmp");
    std::fs::write(&tmp, text)?;
    std::fs::rename(&tmp, path)
}

/// Journal disk errors are logged at most this often (the rest are counted).
const TROUBLE_LINE_EVERY: Duration = Duration::from_secs(60);

/// The journal disk's trouble for the log: the first error of an episode is an ERROR,
/// further ones at most one line a minute with how many were not logged, and the end
/// of an episode that was logged one INFO line. Every error is counted in
/// `journal_errors_total` whether logged or not.
#[derive(Default)]
struct Trouble {
    /// `journal.memory_max_bytes`, for the log.
    cap: usize,
    failing: bool,
    /// A line was logged for the current episode.
    announced: bool,
    last_line: Option<std::time::Instant>,
    not_logged: u64,
}

impl Trouble {
    /// Counts an error; a disk error goes to the rate-limited log, a refused record (a
    /// bug, not the disk) is logged each time.
    fn report(&mut self, e: &journal::JournalError, held: usize, metrics: &Metrics) {
        metrics.journal_errors.fetch_add(1, Relaxed);
        if e.is_disk() {
            self.failed(e, held);
        } else {
            error!(error = %e, "journal refused a record; result not kept");
        }
    }

    fn failed(&mut self, e: &journal::JournalError, held: usize) {
        let cap = self.cap;
        let due = self
            .last_line
            .is_none_or(|t| t.elapsed() >= TROUBLE_LINE_EVERY);
        if due {
            if self.failing {
                warn!(error = %e, held, errors_not_logged = self.not_logged, "journal still cannot be written; results are held in memory and published");
            } else {
                error!(error = %e, held, memory_max_bytes = cap, "journal cannot be written: results are held in memory (up to memory_max_bytes, oldest dropped beyond it) and still published; /readyz is not ready until the journal takes them again");
            }
            self.last_line = Some(std::time::Instant::now());
            self.not_logged = 0;
            self.announced = true;
        } else {
            self.not_logged += 1;
        }
        self.failing = true;
    }

    fn recovered(&mut self) {
        if self.failing && self.announced {
            info!(
                errors_not_logged = self.not_logged,
                "journal writable again: the results held in memory are written"
            );
        }
        self.failing = false;
        self.announced = false;
    }
}

/// The journal thread: appends, reads back, and keeps the published cursor.
fn journal_thread(
    mut j: Journal,
    mut rx: mpsc::Receiver<JournalCmd>,
    to_link: mpsc::Sender<ToLink>,
    metrics: Arc<Metrics>,
    clock: Clock,
    state_path: std::path::PathBuf,
    memory_cap: usize,
) {
    let update = |j: &Journal| {
        let st = j.stats();
        metrics.journal_last_seq.store(st.last_seq, Relaxed);
        metrics.journal_bytes.store(st.bytes, Relaxed);
        metrics.journal_dropped.store(st.dropped_records, Relaxed);
        metrics
            .journal_dropped_unpublished
            .store(st.dropped_unpublished, Relaxed);
        metrics.journal_held.store(st.held_records as u64, Relaxed);
        metrics.journal_held_dropped.store(st.held_dropped, Relaxed);
        metrics
            .journal_held_dropped_unpublished
            .store(st.held_dropped_unpublished, Relaxed);
    };
    let mut trouble = Trouble {
        cap: memory_cap,
        ..Trouble::default()
    };
    // The periodic fsync and cursor writes on a thread of their own: results do not
    // wait behind them (without it they are done here, as before).
    if let Err(e) = j.defer_syncs() {
        warn!(error = %e, "journal syncs stay on the journal thread (no thread for them)");
    }
    update(&j);
    let _ = to_link.blocking_send(ToLink::JournalAt(j.last_seq()));
    while let Some(cmd) = rx.blocking_recv() {
        let mut ok = true;
        for e in j.sync_errors() {
            ok = false;
            trouble.report(&e, j.held(), &metrics);
        }
        match cmd {
            JournalCmd::Append(items) => {
                // One write for the whole batch (see `Journal::append_batch`); the due
                // fsync only after the records are on their way to the broker.
                let now = clock();
                let batch = j.write_batch(
                    now,
                    items
                        .iter()
                        .map(|a| (a.topic.as_str(), a.retain, a.payload.as_str())),
                );
                ok = batch.errors.is_empty();
                for e in &batch.errors {
                    trouble.report(e, j.held(), &metrics);
                }
                let wrote = batch.seqs.iter().any(Option::is_some);
                let mut out = Vec::with_capacity(items.len());
                for (
                    Append {
                        topic,
                        retain,
                        payload,
                        ..
                    },
                    seq,
                ) in items.into_iter().zip(batch.seqs)
                {
                    // Without a number the record was refused (counted above).
                    if let Some(seq) = seq {
                        out.push(Outgoing {
                            seq,
                            ts_ms: now,
                            topic,
                            retain,
                            payload,
                            replayed: false,
                        });
                    }
                }
                if !out.is_empty() {
                    let _ = to_link.blocking_send(ToLink::Records(out));
                }
                if let Err(e) = j.sync_if_due(now, wrote) {
                    ok = false;
                    trouble.report(&e, j.held(), &metrics);
                }
            }
            JournalCmd::Published { seq, force } => {
                if let Err(e) = j.mark_published(seq, clock(), force) {
                    ok = false;
                    trouble.report(&e, j.held(), &metrics);
                }
            }
            JournalCmd::ReadAfter { after, max } => {
                match j.read_after(after, max) {
                    Ok(records) => {
                        let out: Vec<Outgoing> = records
                            .into_iter()
                            .map(|r| Outgoing {
                                seq: r.seq,
                                ts_ms: r.ts_ms,
                                topic: r.topic,
                                retain: r.retain,
                                payload: r.payload,
                                replayed: true,
                            })
                            .collect();
                        if !out.is_empty() {
                            let _ = to_link.blocking_send(ToLink::Records(out));
                        }
                    }
                    Err(e) => {
                        ok = false;
                        trouble.report(&e, j.held(), &metrics);
                    }
                }
                let _ = to_link.blocking_send(ToLink::ReadDone);
            }
            JournalCmd::Drained => {
                let _ = to_link.blocking_send(ToLink::Drained);
            }
            JournalCmd::SaveState(text) => {
                if let Err(e) = save_state(&state_path, &text) {
                    metrics.journal_errors.fetch_add(1, Relaxed);
                    warn!(error = %e, file = %state_path.display(), "watch state not saved");
                }
            }
            JournalCmd::Retry => {
                if let Err(e) = j.retry_held(clock()) {
                    ok = false;
                    trouble.report(&e, j.held(), &metrics);
                }
            }
        }
        // The link tells the watermark by message only now and then (each message is a
        // wake-up of this thread); in between it is read here from the metrics. After the
        // command: a due cursor write (two files, each fsynced) must not hold back the
        // records just handed to the link.
        let told = metrics.journal_published_seq.load(Relaxed);
        if told > j.published_seq()
            && told <= j.last_seq()
            && let Err(e) = j.mark_published(told, clock(), false)
        {
            ok = false;
            trouble.report(&e, j.held(), &metrics);
        }
        if ok && j.held() == 0 {
            trouble.recovered();
        }
        update(&j);
    }
    if let Err(e) = j.sync() {
        error!(error = %e, "journal sync at shutdown failed");
    }
    if j.held() > 0 {
        error!(
            held = j.held(),
            "shutdown with results held in memory that the journal could not write; those the broker acknowledged are delivered, the rest are lost"
        );
    }
}

/// Gives the pages of memory freed since start-up back to the system. Without it the
/// configuration's parse tree, freed once the settings are built, stays resident (the C
/// allocator keeps freed pages in the middle of its heap): for 100 reactors about 2 MB
/// of a 10 MB daemon. On glibc only (`malloc_trim`); elsewhere nothing.
pub fn release_free_memory() {
    #[cfg(all(target_os = "linux", target_env = "gnu"))]
    {
        unsafe extern "C" {
            /// glibc, <malloc.h>: `int malloc_trim(size_t pad)`.
            fn malloc_trim(pad: usize) -> std::ffi::c_int;
        }
        // SAFETY: malloc_trim takes no pointers; it only walks the allocator's own free
        // lists (under its locks) and advises the kernel on pages no allocation uses.
        unsafe {
            malloc_trim(0);
        }
    }
}

/// The advisory caution logged at start-up.
pub const ADVISORY: &str = "eqwatch is an advisory monitoring tool: it is not a safety function, its alarms do not replace the plant's alarm system or safety systems, and local codes and licensed engineering practice govern";

/// A configuration read again on SIGHUP: the validated settings, or the file's errors
/// as `check` prints them.
pub type ReloadRequest = Result<Settings, String>;

/// What the process around [`run`] can ask of the daemon besides stopping, and how the
/// daemon tells the service manager how it is (`notify.rs`).
pub struct Control {
    pub reloads: mpsc::Receiver<ReloadRequest>,
    pub notifier: notify::Notifier,
}

impl Control {
    /// No reloads and no service manager (the demo, tests).
    pub fn none() -> Self {
        let (_tx, reloads) = mpsc::channel(1);
        Self {
            reloads,
            notifier: notify::Notifier::new(None, None, None, 0),
        }
    }
}

/// Seconds without an evaluator tick after which the watchdog is no longer fed.
const EVALUATOR_STALL: Duration = Duration::from_secs(5);
/// How often the status line is refreshed for the service manager.
const STATUS_EVERY: Duration = Duration::from_secs(10);

/// One line on how the daemon is, for `systemctl status`.
fn status_line(m: &Metrics, reactors: usize) -> String {
    let broker = if m.connected.load(Relaxed) && m.input_connected.load(Relaxed) {
        "broker connected"
    } else {
        "broker away (results kept in the journal)"
    };
    let held = m.journal_held.load(Relaxed);
    let journal = if held > 0 {
        format!("journal NOT WRITABLE, {held} results held in memory")
    } else {
        "journal ok".to_string()
    };
    format!(
        "{broker}; {reactors} reactors; {} results published, {} awaiting the broker; {journal}",
        m.published.load(Relaxed),
        m.backlog()
    )
}

/// Feeds the service manager's watchdog while the evaluator ticks, refreshes the status
/// line, and says STOPPING at shutdown.
async fn service_loop(
    notifier: Arc<notify::Notifier>,
    metrics: Arc<Metrics>,
    reactors: usize,
    shutdown: CancellationToken,
) {
    if !notifier.enabled() {
        return;
    }
    let watchdog = notifier.watchdog();
    let every = watchdog.map_or(Duration::from_secs(1), |w| {
        (w / 2).clamp(Duration::from_millis(100), Duration::from_secs(1))
    });
    let mut wake = tokio::time::interval(every);
    wake.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Delay);
    let mut last_ticks = metrics.evaluator_ticks.load(Relaxed);
    let mut last_change = tokio::time::Instant::now();
    let mut last_ping = tokio::time::Instant::now();
    let mut last_status = tokio::time::Instant::now();
    let mut stalled = false;
    loop {
        tokio::select! {
            _ = wake.tick() => {}
            _ = shutdown.cancelled() => {
                notifier.stopping();
                return;
            }
        }
        let now = tokio::time::Instant::now();
        let ticks = metrics.evaluator_ticks.load(Relaxed);
        if ticks != last_ticks {
            last_ticks = ticks;
            last_change = now;
        }
        let healthy = now - last_change < EVALUATOR_STALL;
        if healthy == stalled {
            stalled = !healthy;
            if stalled {
                error!(
                    seconds = EVALUATOR_STALL.as_secs(),
                    "the evaluator has not ticked: the service manager's watchdog is no longer fed and will restart eqwatch"
                );
                notifier.status("evaluator stalled: watchdog not fed");
            } else {
                info!("the evaluator ticks again: watchdog fed");
            }
        }
        if let Some(w) = watchdog
            && healthy
            && now - last_ping >= w / 2
        {
            notifier.watchdog_ping();
            last_ping = now;
        }
        if healthy && now - last_status >= STATUS_EVERY {
            notifier.status(&status_line(&metrics, reactors));
            last_status = now;
        }
    }
}

/// Carries out configuration reloads: the file's errors refuse it; the evaluator applies
/// the rest or refuses what needs a restart; new input topics go to the input link.
async fn control_loop(
    mut reloads: mpsc::Receiver<ReloadRequest>,
    evaluator: mpsc::Sender<EngineReload>,
    topics: mpsc::Sender<mqtt::TopicChange>,
    notifier: Arc<notify::Notifier>,
    metrics: Arc<Metrics>,
    reactors: usize,
) {
    while let Some(req) = reloads.recv().await {
        notifier.reloading();
        let outcome = match req {
            Err(errors) => {
                error!(errors = %errors, "configuration reload refused: the file has errors; the running configuration is kept");
                Err("the file has errors")
            }
            Ok(new) => {
                let (tx, rx) = tokio::sync::oneshot::channel();
                if evaluator.send((Arc::new(new), tx)).await.is_err() {
                    return; // shutting down
                }
                match rx.await {
                    Err(_) => return,
                    Ok(Err(why)) => {
                        error!(needs_restart = %why.join("; "), "configuration reload refused: these changes need a restart of eqwatch; the running configuration is kept");
                        Err("it needs a restart")
                    }
                    Ok(Ok(r)) => {
                        for (id, why) in &r.runs_reset {
                            warn!(reactor = %id, reason = %why, "reload: a new run starts for this reactor (baseline learned again)");
                        }
                        info!(
                            unchanged = %r.unchanged.join(","),
                            changed = %r.changed.join(","),
                            runs_kept = %r.runs_kept.join(","),
                            alarm_states_kept = %r.alarms_kept.join(","),
                            subscribed = %r.subscribe.join(","),
                            unsubscribed = %r.unsubscribe.join(","),
                            "configuration reloaded"
                        );
                        if !(r.subscribe.is_empty() && r.unsubscribe.is_empty()) {
                            let _ = topics
                                .send(mqtt::TopicChange {
                                    subscribe: r.subscribe,
                                    unsubscribe: r.unsubscribe,
                                })
                                .await;
                        }
                        // The new file's parse tree and the old settings are freed.
                        release_free_memory();
                        Ok(())
                    }
                }
            }
        };
        let line = status_line(&metrics, reactors);
        match outcome {
            Ok(()) => {
                metrics.reloads.fetch_add(1, Relaxed);
                notifier.ready(&format!("configuration reloaded; {line}"));
            }
            Err(why) => {
                metrics.reloads_refused.fetch_add(1, Relaxed);
                notifier.ready(&format!("reload refused ({why}; see the log); {line}"));
            }
        }
    }
}

/// Starts the Sparkplug B links when `[sparkplug]` is configured; returns where the
/// result link copies results for the edge node.
#[cfg(feature = "sparkplug")]
fn sparkplug_links(
    settings: &Settings,
    inputs: &[crate::config::SpbRef],
    in_tx: &mpsc::Sender<RawInput>,
    metrics: &Arc<Metrics>,
    clock: &Clock,
    stop: &CancellationToken,
) -> Result<Option<mpsc::Sender<ResultCopy>>, DaemonError> {
    let Some(spb) = &settings.sparkplug else {
        return Ok(None);
    };
    if !inputs.is_empty() || spb.host_id.is_some() {
        let host = sparkplug::HostLink {
            broker: settings.broker.clone(),
            settings: spb.clone(),
            inputs: inputs.to_vec(),
            clock: clock.clone(),
        };
        let (tx, m, s) = (in_tx.clone(), metrics.clone(), stop.clone());
        tokio::spawn(async move {
            if let Err(e) = host.run(tx, m, s).await {
                error!(error = %e, "sparkplug host connection not started");
            }
        });
        info!(inputs = inputs.len(), "sparkplug: reading edge nodes");
    }
    if !spb.publish {
        return Ok(None);
    }
    let (tx, rx) = mpsc::channel(sparkplug::HELD_MAX);
    let edge = sparkplug::EdgeLink {
        broker: settings.broker.clone(),
        settings: spb.clone(),
        reactors: settings
            .reactors
            .iter()
            .map(|r| r.spec.id.clone())
            .collect(),
        clock: clock.clone(),
    };
    let (m, s) = (metrics.clone(), stop.clone());
    tokio::spawn(async move {
        if let Err(e) = edge.run(rx, m, s).await {
            error!(error = %e, "sparkplug edge connection not started");
        }
    });
    info!(group = %spb.group_id, edge_node = %spb.edge_node_id, "sparkplug: publishing results as an edge node");
    Ok(Some(tx))
}

/// Without the `sparkplug` feature a `[sparkplug]` table is refused at start-up.
#[cfg(not(feature = "sparkplug"))]
fn sparkplug_links(
    settings: &Settings,
    _inputs: &[crate::config::SpbRef],
    _in_tx: &mpsc::Sender<RawInput>,
    _metrics: &Arc<Metrics>,
    _clock: &Clock,
    _stop: &CancellationToken,
) -> Result<Option<mpsc::Sender<ResultCopy>>, DaemonError> {
    if settings.sparkplug.is_some() {
        return Err(DaemonError::Config(
            "[sparkplug] is configured but this build has no Sparkplug support (build with --features sparkplug)".into(),
        ));
    }
    Ok(None)
}

/// Runs the daemon until `shutdown` is cancelled; returns after a clean stop
/// (input stopped, results flushed with QoS 1, `offline` published, disconnected).
pub async fn run(
    settings: Arc<Settings>,
    shutdown: CancellationToken,
    clock: Clock,
    control: Control,
) -> Result<(), DaemonError> {
    info!(version = env!("CARGO_PKG_VERSION"), site = %settings.site, reactors = settings.reactors.len(), "eqwatch starting");
    warn!("{ADVISORY}");
    let ids: Vec<String> = settings
        .reactors
        .iter()
        .map(|r| r.spec.id.clone())
        .collect();
    let metrics = Arc::new(Metrics::new(&ids));
    let journal = Journal::open(&settings.journal, clock())
        .map_err(|e| DaemonError::Journal(e.to_string()))?;
    let published_at_start = journal.published_seq();
    let last_at_start = journal.last_seq();
    if last_at_start > published_at_start {
        info!(
            backlog = last_at_start - published_at_start,
            "journal holds results not yet acknowledged; they will be published, marked late"
        );
    }
    let http_cancel = CancellationToken::new();
    let listener = match settings.http_listen {
        Some(addr) => {
            let l = http::bind(addr)
                .await
                .map_err(|source| DaemonError::Http { addr, source })?;
            info!(%addr, "metrics on http://{addr}/metrics, the live page on http://{addr}/");
            Some(l)
        }
        None => None,
    };
    let status_topic = settings.daemon_topic("status");
    let started = crate::timefmt::format_rfc3339(clock());
    let status = |state: &str, reason: &str| {
        serde_json::json!({"state": state, "reason": reason, "version": env!("CARGO_PKG_VERSION"), "site": settings.site, "started": started, "advisory": crate::wire::result::ADVISORY_SHORT}).to_string()
    };
    // The result link: our own MQTT 3.1.1 client (publink.rs), which writes a batch of
    // results in one write; the input link keeps rumqttc (mqtt.rs).
    let result_options = publink::Options::new(
        &settings.broker,
        &status_topic,
        &status("offline", "connection lost"),
    )?;
    let in_opts = mqtt::input_options(&settings.broker)?;
    let engine = crate::pipeline::Engine::new(settings.clone(), metrics.clone())
        .map_err(DaemonError::Journal)?;
    let topics = engine.subscriptions();
    let engine_spb = engine.sparkplug_inputs();
    let (in_client, mut in_eventloop) = rumqttc::AsyncClient::new(in_opts, topics.len() + 64);
    // Results are small and latency matters: no Nagle delay on our connections.
    let mut net = rumqttc::NetworkOptions::new();
    net.set_tcp_nodelay(true);
    net.set_connection_timeout(settings.broker.connect_timeout.as_secs());
    in_eventloop.set_network_options(net);

    // Bounded: when the disk is slower than the evaluator, the evaluator waits, the input
    // queue fills, the link stops reading and TCP pushes back on the broker, instead of
    // results piling up in memory.
    let (jtx, jrx) = mpsc::channel::<JournalCmd>(JOURNAL_QUEUE);
    // Bounded too: the journal waits for the link rather than queueing records in memory
    // (the outbox reads back from disk whatever it has no room for).
    let (to_link, from_journal) = mpsc::channel::<ToLink>(LINK_QUEUE);
    let jm = metrics.clone();
    let jclock = clock.clone();
    let state_path = settings.journal.dir.join(state::STATE_FILE);
    let memory_cap = settings.journal.memory_max_bytes;
    let saved = {
        let p = state_path.clone();
        tokio::task::spawn_blocking(move || std::fs::read_to_string(p).ok())
            .await
            .ok()
            .flatten()
    };
    let jthread = std::thread::Builder::new()
        .name("eqwatch-journal".into())
        .spawn(move || journal_thread(journal, jrx, to_link, jm, jclock, state_path, memory_cap))
        .map_err(|e| DaemonError::Journal(e.to_string()))?;
    let (in_tx, in_rx) = mpsc::channel::<RawInput>(INPUT_QUEUE);
    // The live page: served on the HTTP listener; its commands join the input queue.
    let mut tap = None;
    if let Some(listener) = listener {
        let (t, web) = page::start(&settings, in_tx.clone(), clock.clone())
            .map_err(|e| DaemonError::Journal(format!("live page thread: {e}")))?;
        tap = Some(t);
        tokio::spawn(http::serve(
            listener,
            metrics.clone(),
            Some(web),
            http_cancel.clone(),
        ));
    }
    let acked = Arc::new(tokio::sync::Notify::new());
    let (reload_tx, reload_rx) = mpsc::channel::<EngineReload>(1);
    let evaluator = tokio::spawn(evaluate_loop(Evaluator {
        engine,
        rx: in_rx,
        journal: jtx.clone(),
        clock: clock.clone(),
        saved,
        metrics: metrics.clone(),
        acked: acked.clone(),
        reloads: reload_rx,
        page: tap,
    }));
    metrics.ready.store(true, Relaxed);
    // Configuration validated, journal opened and recovered, metrics port bound.
    let notifier = Arc::new(control.notifier);
    let reactors = settings.reactors.len();
    notifier.ready(&status_line(&metrics, reactors));
    tokio::spawn(service_loop(
        notifier.clone(),
        metrics.clone(),
        reactors,
        shutdown.clone(),
    ));
    let (topics_tx, topics_rx) = mpsc::channel::<mqtt::TopicChange>(4);
    tokio::spawn(control_loop(
        control.reloads,
        reload_tx,
        topics_tx,
        notifier,
        metrics.clone(),
        reactors,
    ));
    let spb_stop = CancellationToken::new();
    let copies = sparkplug_links(&settings, &engine_spb, &in_tx, &metrics, &clock, &spb_stop)?;
    let input = mqtt::InputLink {
        broker: settings.broker.clone(),
        topics,
        clock: clock.clone(),
        changes: topics_rx,
    };
    let input = tokio::spawn(input.run(
        in_client,
        in_eventloop,
        in_tx,
        metrics.clone(),
        shutdown.clone(),
    ));
    // The configuration's parse tree (about 2 MB for 100 reactors) is freed by now.
    release_free_memory();
    let link = publink::ResultLink {
        broker: settings.broker.clone(),
        options: result_options,
        status_topic,
        online_payload: status("online", "running"),
        offline_payload: status("offline", "shutdown"),
        published_at_start,
        journal_last_at_start: last_at_start,
        clock,
        acked,
        copies,
    };
    link.run(
        from_journal,
        jtx,
        metrics.clone(),
        shutdown,
        Duration::from_secs(10),
    )
    .await;
    let _ = input.await;
    spb_stop.cancel();
    let _ = evaluator.await;
    http_cancel.cancel();
    // The link dropped its journal sender; the evaluator dropped its own: the thread ends.
    let _ = tokio::task::spawn_blocking(move || jthread.join()).await;
    info!(
        published = metrics.published.load(Relaxed),
        backlog = metrics.backlog(),
        "eqwatch stopped"
    );
    Ok(())
}
