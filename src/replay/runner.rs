//! One replay run: the engine's lanes on worker threads, rows handed out in batches,
//! results merged back in the daemon's order and written through a writer thread (JSON
//! lines), or as one CSV per reactor ([`super::table`]).

use super::csv::*;
use super::*;
use crate::config::Settings;
use crate::monitor::Input;
use crate::pipeline::Append;
use crate::pipeline::metrics::Metrics;
use crate::pipeline::{Engine, Trace};
use std::io::{BufRead, Write};
use std::sync::Arc;

/// Counts at the end of a replay.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Summary {
    pub lines: usize,
    pub rows: usize,
    pub skipped: Vec<RowProblem>,
    pub skipped_total: usize,
    pub readings: usize,
    pub records: usize,
    pub first_ms: Option<i64>,
    pub last_ms: Option<i64>,
}

/// One replay: the engine's lanes run on worker threads (each owns some reactors);
/// the main thread reads the CSV, hands rows out, and merges what comes back in the
/// order the daemon would have made it (inputs in row order, then the timer tick), with
/// the plant-wide flood count in the same places. The output does not depend on the
/// number of threads.
pub struct Replay {
    settings: Arc<Settings>,
    engine: Option<Engine>,
    traces: Option<Vec<Trace>>,
    keep_trace: bool,
    metrics: Arc<Metrics>,
    threads: usize,
}

/// How many skipped-row problems are kept for the summary (all are counted and logged).
pub(super) const KEEP_PROBLEMS: usize = 50;
/// Rows handed to the workers at once.
pub(super) const BATCH_ROWS: usize = 512;
/// Order of a lane's timer tick within a row: after every input of the row.
pub(super) const TICK_ORDER: u32 = u32::MAX / 2;

/// One row's inputs for one worker: (order within the row, reactor, input).
pub(super) type RowItems = Vec<(u32, usize, Input)>;
/// What a worker gives back for one row: (order, piece), non-empty pieces only.
pub(super) type RowOut = Vec<(u32, Piece)>;

/// What the records become: JSON lines, or a CSV row per result (one table per reactor,
/// by reactor index).
#[derive(Clone)]
pub(super) enum Format {
    Lines,
    Tables(Arc<Vec<super::table::Table>>),
}

/// Where the encoded output goes.
pub(super) trait Output {
    /// Bytes a worker encoded from reactor `reactor`'s records.
    fn encoded(&mut self, reactor: usize, bytes: &[u8]) -> std::io::Result<()>;
    /// A record encoded here (the plant-wide part's, or one from a piece with events).
    fn record(&mut self, rec: &Append) -> Result<(), ReplayError>;
}

/// Every record as one JSON line to one writer.
struct Lines<'a>(&'a mut dyn Write);

impl Output for Lines<'_> {
    fn encoded(&mut self, _reactor: usize, bytes: &[u8]) -> std::io::Result<()> {
        self.0.write_all(bytes)
    }
    fn record(&mut self, rec: &Append) -> Result<(), ReplayError> {
        Ok(write_record(self.0, rec)?)
    }
}

/// A CSV per reactor: result rows only; the other records are left out.
struct Tables<'a> {
    tables: Arc<Vec<super::table::Table>>,
    files: &'a mut [Box<dyn Write>],
}

impl Output for Tables<'_> {
    fn encoded(&mut self, reactor: usize, bytes: &[u8]) -> std::io::Result<()> {
        match self.files.get_mut(reactor) {
            Some(f) => f.write_all(bytes),
            None => Err(std::io::Error::other(format!(
                "no CSV for reactor {reactor}"
            ))),
        }
    }
    fn record(&mut self, rec: &Append) -> Result<(), ReplayError> {
        let Some(r) = self.tables.iter().position(|t| t.result_topic == rec.topic) else {
            return Ok(());
        };
        let mut bytes = Vec::new();
        self.tables[r]
            .row(&rec.payload, &mut bytes)
            .map_err(ReplayError::Engine)?;
        Ok(self.encoded(r, &bytes)?)
    }
}

/// A lane's output for one input or tick.
pub(super) enum Piece {
    /// Records with no events among them, already encoded in the batch's byte buffer
    /// (JSON lines, or CSV rows of the reactor's results): (reactor, start, end, record
    /// count).
    Encoded(usize, usize, usize, usize),
    /// Records with events: the plant-wide flood count must see them (main thread).
    Events(crate::pipeline::Sink),
}

/// A worker's answer for one batch of rows.
pub(super) struct BatchOut {
    bytes: Vec<u8>,
    rows: Vec<RowOut>,
    /// The first result that could not be made a CSV row (a bug, not the data).
    error: Option<String>,
}

/// Moves reactor `reactor`'s lane output into the batch: encoded in place when it
/// holds no events.
pub(super) fn piece(
    sink: &mut crate::pipeline::Sink,
    bytes: &mut Vec<u8>,
    format: &Format,
    reactor: usize,
) -> Result<Option<Piece>, String> {
    if sink.is_empty() {
        return Ok(None);
    }
    if sink.has_events() {
        return Ok(Some(Piece::Events(std::mem::take(sink))));
    }
    let start = bytes.len();
    let n = sink.records.len();
    for rec in sink.records.drain(..) {
        match format {
            // Writing to a Vec cannot fail.
            Format::Lines => {
                let _ = write_record(bytes, &rec);
            }
            Format::Tables(t) => {
                if let Some(t) = t.get(reactor).filter(|t| t.result_topic == rec.topic) {
                    t.row(&rec.payload, bytes)?;
                }
            }
        }
    }
    Ok(Some(Piece::Encoded(reactor, start, bytes.len(), n)))
}

impl Replay {
    pub fn new(settings: Arc<Settings>, keep_trace: bool) -> Result<Self, ReplayError> {
        let ids: Vec<String> = settings
            .reactors
            .iter()
            .map(|r| r.spec.id.clone())
            .collect();
        let metrics = Arc::new(Metrics::new(&ids));
        let mut engine =
            Engine::new(settings.clone(), metrics.clone()).map_err(ReplayError::Engine)?;
        if keep_trace {
            engine.enable_trace();
        }
        let threads = std::thread::available_parallelism()
            .map_or(1, |n| n.get())
            .clamp(1, ids.len().max(1));
        Ok(Self {
            settings,
            engine: Some(engine),
            traces: None,
            keep_trace,
            metrics,
            threads,
        })
    }

    /// Worker threads to use (1: everything on the calling thread's helper).
    pub fn with_threads(mut self, n: usize) -> Self {
        self.threads = n.clamp(1, self.settings.reactors.len().max(1));
        self
    }

    pub fn metrics(&self) -> &Metrics {
        &self.metrics
    }

    /// The plot traces, after `run`, when asked for in `new`.
    pub fn traces(&mut self) -> Option<Vec<Trace>> {
        if self.keep_trace {
            self.traces.take()
        } else {
            None
        }
    }

    /// Runs the CSV from `input`, writing each record as one JSON line
    /// (`{"topic":...,"retain":...,"payload":{...}}`) to `out`. `progress` is called
    /// with the bytes read so far every few thousand rows; `problem` with each
    /// skipped row as it happens. Runs once.
    pub fn run(
        &mut self,
        input: &mut dyn BufRead,
        out: &mut dyn Write,
        progress: &mut dyn FnMut(u64),
        problem: &mut dyn FnMut(&RowProblem),
    ) -> Result<Summary, ReplayError> {
        self.run_into(input, &Format::Lines, &mut Lines(out), progress, problem)
    }

    /// Runs the CSV from `input`, writing one CSV per reactor: `files[r]` for the
    /// configuration's reactor `r`, a header line, then a row per result
    /// ([`super::table`]). Runs once.
    pub(super) fn run_tables(
        &mut self,
        input: &mut dyn BufRead,
        files: &mut [Box<dyn Write>],
        progress: &mut dyn FnMut(u64),
        problem: &mut dyn FnMut(&RowProblem),
    ) -> Result<Summary, ReplayError> {
        let tables: Vec<super::table::Table> = self
            .settings
            .reactors
            .iter()
            .map(|r| super::table::Table::new(&self.settings, r))
            .collect();
        if files.len() != tables.len() {
            return Err(ReplayError::Engine(format!(
                "{} CSV files for {} reactors",
                files.len(),
                tables.len()
            )));
        }
        for (f, t) in files.iter_mut().zip(&tables) {
            f.write_all(t.header().as_bytes())
                .map_err(|e| ReplayError::Engine(format!("writing {}.csv: {e}", t.reactor)))?;
        }
        let tables = Arc::new(tables);
        let format = Format::Tables(Arc::clone(&tables));
        self.run_into(
            input,
            &format,
            &mut Tables { tables, files },
            progress,
            problem,
        )
    }

    fn run_into(
        &mut self,
        input: &mut dyn BufRead,
        format: &Format,
        out: &mut dyn Output,
        progress: &mut dyn FnMut(u64),
        problem: &mut dyn FnMut(&RowProblem),
    ) -> Result<Summary, ReplayError> {
        let engine = self
            .engine
            .take()
            .ok_or_else(|| ReplayError::Engine("a replay runs once".into()))?;
        let (lanes, mut plant) = engine.into_parts();
        let workers = self.threads.min(lanes.len()).max(1);
        // Reactors to workers: longest estimated work first, each to the least loaded.
        let assign = assign_workers(&self.settings, workers);
        let mut owned: Vec<Vec<crate::pipeline::Lane>> = (0..workers).map(|_| Vec::new()).collect();
        for lane in lanes {
            let w = assign[lane.reactor()];
            owned[w].push(lane);
        }
        let settings = self.settings.clone();
        let metrics = self.metrics.clone();
        let result = std::thread::scope(|scope| {
            let mut to_workers = Vec::with_capacity(workers);
            let mut from_workers = Vec::with_capacity(workers);
            let mut handles = Vec::with_capacity(workers);
            for mine in owned {
                let (tx, rx) = std::sync::mpsc::sync_channel::<Vec<(i64, RowItems)>>(4);
                let (rtx, rrx) = std::sync::mpsc::sync_channel::<BatchOut>(4);
                to_workers.push(tx);
                from_workers.push(rrx);
                let format = format.clone();
                handles.push(scope.spawn(move || work(mine, &rx, &rtx, &format)));
            }
            let mut pending: std::collections::VecDeque<Vec<i64>> = Default::default();
            let mut merger = Merger {
                from_workers,
                records: Vec::new(),
            };
            let mut sum = Summary::default();
            let mut batch = |batch: Vec<(i64, Vec<RowItems>)>, sum: &mut Summary| {
                let (times, split) = split_by_worker(batch, workers);
                for (w, b) in split.into_iter().enumerate() {
                    to_workers[w]
                        .send(b)
                        .map_err(|_| ReplayError::Engine("a replay worker stopped".into()))?;
                }
                pending.push_back(times);
                if pending.len() > 2
                    && let Some(times) = pending.pop_front()
                {
                    merger.merge(times, &mut plant, out, sum)?;
                }
                Ok(())
            };
            let plan = RowPlan {
                settings: &settings,
                workers,
                assign: &assign,
                metrics: &metrics,
            };
            let mut hooks = RowHooks {
                progress,
                problem,
                batch: &mut batch,
            };
            let read = read_rows(&plan, input, &mut sum, &mut hooks);
            let mut result = read;
            while let Some(times) = pending.pop_front() {
                if result.is_ok() {
                    result = merger.merge(times, &mut plant, out, &mut sum);
                }
            }
            drop(to_workers);
            let mut lanes = Vec::new();
            for h in handles {
                match h.join() {
                    Ok(mine) => lanes.extend(mine),
                    Err(_) => {
                        if result.is_ok() {
                            result = Err(ReplayError::Engine("a replay worker panicked".into()));
                        }
                    }
                }
            }
            lanes.sort_by_key(|lane| lane.reactor());
            result.map(|()| (sum, lanes))
        });
        let (sum, mut lanes) = result?;
        self.traces = Some(
            lanes
                .iter_mut()
                .map(|lane| lane.trace.take().unwrap_or_default())
                .collect(),
        );
        Ok(sum)
    }
}

/// One worker thread: its lanes take each row's inputs in order, then tick to the
/// row's time; what they make is encoded into the batch's bytes where it holds no
/// events, or kept for the plant-wide flood count. Returns its lanes at the end.
fn work(
    mut mine: Vec<crate::pipeline::Lane>,
    rx: &std::sync::mpsc::Receiver<Vec<(i64, RowItems)>>,
    tx: &std::sync::mpsc::SyncSender<BatchOut>,
    format: &Format,
) -> Vec<crate::pipeline::Lane> {
    let index: Vec<usize> = mine.iter().map(|lane| lane.reactor()).collect();
    let find = |r: usize| index.iter().position(|&x| x == r);
    let mut sink = crate::pipeline::Sink::default();
    for batch in rx {
        let mut outs = BatchOut {
            bytes: Vec::with_capacity(1 << 20),
            rows: Vec::with_capacity(batch.len()),
            error: None,
        };
        let mut keep = |got: Result<Option<Piece>, String>, order: u32, row: &mut RowOut| match got
        {
            Ok(Some(p)) => row.push((order, p)),
            Ok(None) => {}
            Err(e) => {
                outs.error.get_or_insert(e);
            }
        };
        for (t, items) in batch {
            let mut row: RowOut = Vec::new();
            for (order, r, input) in items {
                let Some(k) = find(r) else { continue };
                mine[k].accept(input, t, t, &mut sink);
                keep(
                    piece(&mut sink, &mut outs.bytes, format, r),
                    order,
                    &mut row,
                );
            }
            for lane in mine.iter_mut() {
                lane.tick(t, &mut sink);
                let r = lane.reactor();
                keep(
                    piece(&mut sink, &mut outs.bytes, format, r),
                    TICK_ORDER + r as u32,
                    &mut row,
                );
            }
            outs.rows.push(row);
        }
        if tx.send(outs).is_err() {
            break;
        }
    }
    mine
}

/// Each row's time, and its items split by worker.
#[allow(clippy::type_complexity)]
fn split_by_worker(
    batch: Vec<(i64, Vec<RowItems>)>,
    workers: usize,
) -> (Vec<i64>, Vec<Vec<(i64, RowItems)>>) {
    let times: Vec<i64> = batch.iter().map(|(t, _)| *t).collect();
    let mut split: Vec<Vec<(i64, RowItems)>> = (0..workers)
        .map(|_| Vec::with_capacity(batch.len()))
        .collect();
    for (t, per_worker) in batch {
        for (w, items) in per_worker.into_iter().enumerate() {
            split[w].push((t, items));
        }
    }
    (times, split)
}

/// Puts the workers' output back in the daemon's order, row by row: the pieces of a
/// row by input order, the plant-wide flood count over events as they come, then the
/// plant's tick at the row's time.
struct Merger {
    from_workers: Vec<std::sync::mpsc::Receiver<BatchOut>>,
    records: Vec<Append>,
}

impl Merger {
    fn merge(
        &mut self,
        times: Vec<i64>,
        plant: &mut crate::pipeline::Plant,
        out: &mut dyn Output,
        sum: &mut Summary,
    ) -> Result<(), ReplayError> {
        let mut got: Vec<BatchOut> = Vec::with_capacity(self.from_workers.len());
        for rx in &self.from_workers {
            got.push(
                rx.recv()
                    .map_err(|_| ReplayError::Engine("a replay worker stopped".into()))?,
            );
        }
        if let Some(e) = got.iter_mut().find_map(|b| b.error.take()) {
            return Err(ReplayError::Engine(e));
        }
        let bytes: Vec<Vec<u8>> = got
            .iter_mut()
            .map(|b| std::mem::take(&mut b.bytes))
            .collect();
        let mut per: Vec<std::vec::IntoIter<RowOut>> =
            got.into_iter().map(|b| b.rows.into_iter()).collect();
        let mut row: Vec<(u32, usize, Piece)> = Vec::new();
        let records = &mut self.records;
        for t in times {
            row.clear();
            for (w, it) in per.iter_mut().enumerate() {
                row.extend(
                    it.next()
                        .unwrap_or_default()
                        .into_iter()
                        .map(|(o, p)| (o, w, p)),
                );
            }
            row.sort_by_key(|(order, _, _)| *order);
            for (_, w, p) in row.drain(..) {
                match p {
                    Piece::Encoded(r, a, b, n) => {
                        out.encoded(r, &bytes[w][a..b])?;
                        sum.records += n;
                    }
                    Piece::Events(mut sink) => plant.drain(&mut sink, records),
                }
                sum.records += records.len();
                for rec in records.drain(..) {
                    out.record(&rec)?;
                }
            }
            plant.tick(t, records);
            sum.records += records.len();
            for rec in records.drain(..) {
                out.record(&rec)?;
            }
        }
        Ok(())
    }
}

/// Worker of each reactor. The work per analysis is estimated from the model: measured
/// on the demo plant (perf, one thread per reactor: 13–21 % of the samples each), a
/// second reaction costs about a quarter more and Peng–Robinson about 60 % more than
/// one ideal-gas reaction.
pub(super) fn assign_workers(s: &Settings, workers: usize) -> Vec<usize> {
    let cost = |r: &crate::config::ReactorSettings| {
        let base = 100 + 25 * r.spec.reactions.len().saturating_sub(1);
        if r.spec.eos == crate::equilibrium::EosKind::Ideal {
            base
        } else {
            base * 16 / 10
        }
    };
    let mut order: Vec<(usize, usize)> = s.reactors.iter().map(cost).enumerate().collect();
    order.sort_by(|a, b| b.1.cmp(&a.1).then(a.0.cmp(&b.0)));
    let mut load = vec![0usize; workers.max(1)];
    let mut assign = vec![0usize; s.reactors.len()];
    for (r, c) in order {
        let w = (0..load.len()).min_by_key(|&w| (load[w], w)).unwrap_or(0);
        load[w] += c;
        assign[r] = w;
    }
    assign
}

pub(super) fn write_record(out: &mut dyn Write, rec: &Append) -> std::io::Result<()> {
    // Topics are configuration text: letters, digits, `/`, `-`, `_`; still escaped.
    let topic = serde_json::to_string(&rec.topic).unwrap_or_else(|_| "\"\"".into());
    writeln!(
        out,
        "{{\"topic\":{topic},\"retain\":{},\"payload\":{}}}",
        rec.retain, rec.payload
    )
}

/// A `Write` that hands 1 MiB chunks to a writer thread.
pub(super) struct Pipe {
    buf: Vec<u8>,
    tx: std::sync::mpsc::SyncSender<Vec<u8>>,
}

pub(super) const CHUNK: usize = 1 << 20;

impl Pipe {
    pub(super) fn new(tx: std::sync::mpsc::SyncSender<Vec<u8>>) -> Self {
        Self {
            buf: Vec::with_capacity(CHUNK + 4096),
            tx,
        }
    }
    fn send(&mut self) -> std::io::Result<()> {
        if self.buf.is_empty() {
            return Ok(());
        }
        let chunk = std::mem::replace(&mut self.buf, Vec::with_capacity(CHUNK + 4096));
        self.tx
            .send(chunk)
            .map_err(|_| std::io::Error::other("the result writer stopped"))
    }
}

impl Write for Pipe {
    fn write(&mut self, data: &[u8]) -> std::io::Result<usize> {
        self.buf.extend_from_slice(data);
        if self.buf.len() >= CHUNK {
            self.send()?;
        }
        Ok(data.len())
    }
    fn flush(&mut self) -> std::io::Result<()> {
        self.send()
    }
}
