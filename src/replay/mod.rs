//! Replay of plant history: a CSV of timestamped readings run through the daemon's own
//! processing path ([`crate::pipeline::Engine`]: alignment, quality, evaluation,
//! drift, alerts, alarms), deterministically, writing the records the daemon would
//! publish and the traces for plots.
//!
//! # The CSV format
//! - UTF-8, comma-separated, no quoting; lines starting with `#` are comments; blank
//!   lines are skipped. The first other line is the header.
//! - Column `time`: RFC 3339 (`2026-01-01T00:05:00Z`) or epoch milliseconds; rows in
//!   time order (equal times allowed).
//! - Every other column is named by an input tag of the configuration, optionally with
//!   a unit in brackets that overrides the configured one (`BAW1-TI-305A [degC]`):
//!   a thermocouple, pressure or measured steam-ratio tag holds that reading; an
//!   analyser component is `<composition tag>.<species>` (`BAW1-AI-301.CO [ppm]`);
//!   `<tag>.quality` holds good, uncertain or bad for a scalar or an analyser.
//! - An empty cell is "no reading". The time on a row is the time the values were
//!   reported (for an analyser its report time; the sample time is that minus the
//!   configured lag, as for MQTT messages).
//! - A row with a bad number, the wrong number of cells, a bad time or a time earlier
//!   than the row before is reported with its line number and skipped whole. An unknown
//!   or repeated column, or no `time` column, stops the replay before it starts.
//!
//! Within a row, readings go to the engine in column order for scalars, then one
//! analysis per analyser, reactors in configuration order; then the watch timers tick
//! to the row's time.

use std::collections::HashMap;
use std::io::{BufRead, Write};
use std::sync::Arc;

use thiserror::Error;

use crate::config::{ScalarUnit, Settings};
use crate::monitor::spec::SteamRatioSpec;
use crate::monitor::{AnalysisReading, Input, ScalarReading, SourceQuality};
use crate::pipeline::Append;
use crate::pipeline::expand;
use crate::pipeline::metrics::Metrics;
use crate::pipeline::{Engine, Trace};
use crate::timefmt::parse_rfc3339;
use crate::units::{CompositionUnit, PressureUnit, TemperatureUnit};
use crate::wire::input::convert;

#[derive(Debug, Error)]
pub enum ReplayError {
    #[error("line {line}: {message}")]
    Header { line: usize, message: String },
    #[error("the input has no header line")]
    NoHeader,
    #[error("reading the input: {0}")]
    Read(#[from] std::io::Error),
    #[error("{0}")]
    Engine(String),
}

/// A row that was skipped.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct RowProblem {
    pub line: usize,
    pub message: String,
}

#[derive(Debug, Clone, Copy)]
enum Column {
    Time,
    Scalar {
        reactor: usize,
        kind: ScalarKind,
        unit_override: Option<ScalarUnitText>,
    },
    ScalarQuality {
        reactor: usize,
        kind: ScalarKind,
    },
    Component {
        reactor: usize,
        index: usize,
        per_fraction: f64,
    },
    AnalyserQuality {
        reactor: usize,
    },
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum ScalarKind {
    Temperature(usize),
    Pressure,
    SteamRatio,
}

/// A unit override as parsed (`[degC]`).
#[derive(Debug, Clone, Copy)]
enum ScalarUnitText {
    Temperature(TemperatureUnit),
    Pressure(PressureUnit),
}

/// What the CSV columns mean for a configuration.
struct Layout {
    columns: Vec<Column>,
    reactors: usize,
    components: Vec<usize>,
}

fn names(s: &Settings) -> HashMap<String, Column> {
    let mut m = HashMap::new();
    for (r, rs) in s.reactors.iter().enumerate() {
        let mut scalar = |tag: &str, kind| {
            m.insert(
                tag.to_string(),
                Column::Scalar {
                    reactor: r,
                    kind,
                    unit_override: None,
                },
            );
            m.insert(
                format!("{tag}.quality"),
                Column::ScalarQuality { reactor: r, kind },
            );
        };
        for (i, t) in rs.spec.temperatures.iter().enumerate() {
            scalar(&t.tag, ScalarKind::Temperature(i));
        }
        scalar(&rs.spec.pressure.tag, ScalarKind::Pressure);
        if let Some(SteamRatioSpec::Measured(ss)) = &rs.spec.steam_ratio {
            scalar(&ss.tag, ScalarKind::SteamRatio);
        }
        let c = &rs.spec.composition;
        for (i, sp) in c.components.iter().enumerate() {
            m.insert(
                format!("{}.{sp}", c.tag),
                Column::Component {
                    reactor: r,
                    index: i,
                    per_fraction: c.unit.fraction_per_unit(),
                },
            );
        }
        m.insert(
            format!("{}.quality", c.tag),
            Column::AnalyserQuality { reactor: r },
        );
    }
    m
}

fn read_header(s: &Settings, header: &str, line: usize) -> Result<Layout, ReplayError> {
    let known = names(s);
    let err = |message: String| ReplayError::Header { line, message };
    let mut columns = Vec::new();
    let mut seen: HashMap<String, usize> = HashMap::new();
    for (i, raw) in header.split(',').enumerate() {
        let raw = raw.trim();
        let (name, unit) = match raw.split_once(" [") {
            Some((n, u)) => match u.strip_suffix(']') {
                Some(u) => (n.trim(), Some(u.trim())),
                None => {
                    return Err(err(format!(
                        "column {}: \"{raw}\" opens `[` for a unit but does not close it",
                        i + 1
                    )));
                }
            },
            None => (raw, None),
        };
        if let Some(first) = seen.insert(name.to_string(), i + 1) {
            return Err(err(format!(
                "column {} \"{name}\" repeats column {first}",
                i + 1
            )));
        }
        if name.eq_ignore_ascii_case("time") {
            columns.push(Column::Time);
            continue;
        }
        let Some(col) = known.get(name) else {
            let mut close: Vec<&str> = known
                .keys()
                .filter(|k| {
                    let stem = name.split('.').next().unwrap_or(name);
                    k.starts_with(stem) || name.starts_with(k.split('.').next().unwrap_or(k))
                })
                .map(String::as_str)
                .collect();
            close.sort_unstable();
            close.truncate(8);
            return Err(err(format!(
                "column {} \"{name}\" is no input of the configuration{}",
                i + 1,
                if close.is_empty() {
                    "; columns are input tags (e.g. a thermocouple tag) or <analyser tag>.<species>"
                        .to_string()
                } else {
                    format!("; did you mean one of: {}", close.join(", "))
                }
            )));
        };
        let col = match (*col, unit) {
            (c, None) => c,
            (Column::Scalar { reactor, kind, .. }, Some(u)) => {
                let cfg = scalar_unit(s, reactor, kind);
                let over = match cfg {
                    ScalarUnit::Temperature(_) => TemperatureUnit::parse(u)
                        .ok()
                        .map(ScalarUnitText::Temperature),
                    ScalarUnit::Pressure(_) => {
                        PressureUnit::parse(u).ok().map(ScalarUnitText::Pressure)
                    }
                    ScalarUnit::Ratio => None,
                };
                let Some(over) = over else {
                    return Err(err(format!(
                        "column {} \"{name}\": unit \"{u}\" is not a {} unit",
                        i + 1,
                        match cfg {
                            ScalarUnit::Temperature(_) => "temperature",
                            ScalarUnit::Pressure(_) => "pressure (say absolute or gauge)",
                            ScalarUnit::Ratio => "ratio (a steam ratio has no unit)",
                        }
                    )));
                };
                Column::Scalar {
                    reactor,
                    kind,
                    unit_override: Some(over),
                }
            }
            (Column::Component { reactor, index, .. }, Some(u)) => {
                match CompositionUnit::parse(u) {
                    Ok(cu) => Column::Component {
                        reactor,
                        index,
                        per_fraction: cu.fraction_per_unit(),
                    },
                    Err(_) => {
                        return Err(err(format!(
                            "column {} \"{name}\": unit \"{u}\" is not a composition unit (mol%, ppm, fraction, ...)",
                            i + 1
                        )));
                    }
                }
            }
            (_, Some(u)) => {
                return Err(err(format!(
                    "column {} \"{name}\" takes no unit (got \"{u}\")",
                    i + 1
                )));
            }
        };
        columns.push(col);
    }
    if !columns.iter().any(|c| matches!(c, Column::Time)) {
        return Err(err("no \"time\" column".into()));
    }
    Ok(Layout {
        columns,
        reactors: s.reactors.len(),
        components: s
            .reactors
            .iter()
            .map(|r| r.spec.composition.components.len())
            .collect(),
    })
}

fn scalar_unit(s: &Settings, r: usize, kind: ScalarKind) -> ScalarUnit {
    let rs = &s.reactors[r];
    match kind {
        ScalarKind::Temperature(i) => rs.spec.temperatures[i].unit,
        ScalarKind::Pressure => rs.spec.pressure.unit,
        ScalarKind::SteamRatio => ScalarUnit::Ratio,
    }
}

fn parse_time(text: &str) -> Option<i64> {
    let t = text.trim();
    if !t.is_empty() && t.bytes().all(|b| b.is_ascii_digit()) {
        return t.parse().ok();
    }
    parse_rfc3339(t)
}

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
const KEEP_PROBLEMS: usize = 50;
/// Rows handed to the workers at once.
const BATCH_ROWS: usize = 512;
/// Order of a lane's timer tick within a row: after every input of the row.
const TICK_ORDER: u32 = u32::MAX / 2;

/// One row's inputs for one worker: (order within the row, reactor, input).
type RowItems = Vec<(u32, usize, Input)>;
/// What a worker gives back for one row: (order, piece), non-empty pieces only.
type RowOut = Vec<(u32, Piece)>;

/// A lane's output for one input or tick.
enum Piece {
    /// Records with no events among them, already written as JSON lines in the batch's
    /// byte buffer: (start, end, record count).
    Encoded(usize, usize, usize),
    /// Records with events: the plant-wide flood count must see them (main thread).
    Events(crate::pipeline::Sink),
}

/// A worker's answer for one batch of rows.
struct BatchOut {
    bytes: Vec<u8>,
    rows: Vec<RowOut>,
}

/// Moves a lane's output into the batch: encoded in place when it holds no events.
fn piece(sink: &mut crate::pipeline::Sink, bytes: &mut Vec<u8>) -> Option<Piece> {
    if sink.is_empty() {
        return None;
    }
    if sink.has_events() {
        return Some(Piece::Events(std::mem::take(sink)));
    }
    let start = bytes.len();
    let n = sink.records.len();
    for rec in sink.records.drain(..) {
        // Writing to a Vec cannot fail.
        let _ = write_record(bytes, &rec);
    }
    Some(Piece::Encoded(start, bytes.len(), n))
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
            for mut mine in owned {
                let (tx, rx) = std::sync::mpsc::sync_channel::<Vec<(i64, RowItems)>>(4);
                let (rtx, rrx) = std::sync::mpsc::sync_channel::<BatchOut>(4);
                to_workers.push(tx);
                from_workers.push(rrx);
                handles.push(scope.spawn(move || {
                    let index: Vec<usize> = mine.iter().map(|u| u.reactor()).collect();
                    let find = |r: usize| index.iter().position(|&x| x == r);
                    let mut sink = crate::pipeline::Sink::default();
                    for batch in rx {
                        let mut outs = BatchOut {
                            bytes: Vec::with_capacity(1 << 20),
                            rows: Vec::with_capacity(batch.len()),
                        };
                        for (t, items) in batch {
                            let mut row: RowOut = Vec::new();
                            for (order, r, input) in items {
                                let Some(k) = find(r) else { continue };
                                mine[k].accept(input, t, t, &mut sink);
                                if let Some(p) = piece(&mut sink, &mut outs.bytes) {
                                    row.push((order, p));
                                }
                            }
                            for u in mine.iter_mut() {
                                u.tick(t, &mut sink);
                                if let Some(p) = piece(&mut sink, &mut outs.bytes) {
                                    row.push((TICK_ORDER + u.reactor() as u32, p));
                                }
                            }
                            outs.rows.push(row);
                        }
                        if rtx.send(outs).is_err() {
                            break;
                        }
                    }
                    mine
                }));
            }
            let mut pending: std::collections::VecDeque<Vec<i64>> = Default::default();
            let mut records: Vec<Append> = Vec::new();
            let mut merge = |times: Vec<i64>,
                             plant: &mut crate::pipeline::Plant,
                             out: &mut dyn Write,
                             sum: &mut Summary|
             -> Result<(), ReplayError> {
                let mut got: Vec<BatchOut> = Vec::with_capacity(workers);
                for rx in &from_workers {
                    got.push(
                        rx.recv()
                            .map_err(|_| ReplayError::Engine("a replay worker stopped".into()))?,
                    );
                }
                let bytes: Vec<Vec<u8>> = got
                    .iter_mut()
                    .map(|b| std::mem::take(&mut b.bytes))
                    .collect();
                let mut per: Vec<std::vec::IntoIter<RowOut>> =
                    got.into_iter().map(|b| b.rows.into_iter()).collect();
                let mut row: Vec<(u32, usize, Piece)> = Vec::new();
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
                            Piece::Encoded(a, b, n) => {
                                out.write_all(&bytes[w][a..b])?;
                                sum.records += n;
                            }
                            Piece::Events(mut sink) => plant.drain(&mut sink, &mut records),
                        }
                        sum.records += records.len();
                        for rec in records.drain(..) {
                            write_record(out, &rec)?;
                        }
                    }
                    plant.tick(t, &mut records);
                    sum.records += records.len();
                    for rec in records.drain(..) {
                        write_record(out, &rec)?;
                    }
                }
                Ok(())
            };
            let mut sum = Summary::default();
            let read = read_rows(
                &settings,
                input,
                &mut sum,
                progress,
                problem,
                &mut |batch: Vec<(i64, Vec<RowItems>)>, sum: &mut Summary| {
                    let times: Vec<i64> = batch.iter().map(|(t, _)| *t).collect();
                    // Split each row's items by worker.
                    let mut split: Vec<Vec<(i64, RowItems)>> = (0..workers)
                        .map(|_| Vec::with_capacity(batch.len()))
                        .collect();
                    for (t, per_worker) in batch {
                        for (w, items) in per_worker.into_iter().enumerate() {
                            split[w].push((t, items));
                        }
                    }
                    for (w, b) in split.into_iter().enumerate() {
                        to_workers[w]
                            .send(b)
                            .map_err(|_| ReplayError::Engine("a replay worker stopped".into()))?;
                    }
                    pending.push_back(times);
                    if pending.len() > 2 {
                        if let Some(times) = pending.pop_front() {
                            merge(times, &mut plant, out, sum)?;
                        }
                    }
                    Ok(())
                },
                workers,
                &assign,
                &metrics,
            );
            let mut result = read;
            while let Some(times) = pending.pop_front() {
                if result.is_ok() {
                    result = merge(times, &mut plant, out, &mut sum);
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

/// Worker of each reactor. The work per analysis is estimated from the model: measured
/// on the demo plant (perf, one thread per reactor: 13–21 % of the samples each), a
/// second reaction costs about a quarter more and Peng–Robinson about 60 % more than
/// one ideal-gas reaction.
fn assign_workers(s: &Settings, workers: usize) -> Vec<usize> {
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

/// Reads the CSV: header, then rows checked whole; good rows become per-worker input
/// lists (in the daemon's order: scalars in column order, then one analysis per
/// analyser) handed to `batch` in groups of [`BATCH_ROWS`].
#[allow(clippy::type_complexity, clippy::too_many_arguments)]
fn read_rows(
    settings: &Settings,
    input: &mut dyn BufRead,
    sum: &mut Summary,
    progress: &mut dyn FnMut(u64),
    problem: &mut dyn FnMut(&RowProblem),
    batch: &mut dyn FnMut(Vec<(i64, Vec<RowItems>)>, &mut Summary) -> Result<(), ReplayError>,
    workers: usize,
    assign: &[usize],
    metrics: &Metrics,
) -> Result<(), ReplayError> {
    let mut line = String::new();
    let mut bytes = 0u64;
    let mut layout: Option<Layout> = None;
    let mut last_time: Option<i64> = None;
    let mut analyses: Vec<Vec<Option<f64>>> = Vec::new();
    let mut a_quality: Vec<SourceQuality> = Vec::new();
    let mut a_present: Vec<bool> = Vec::new();
    let mut s_quality: Vec<(usize, ScalarKind, SourceQuality)> = Vec::new();
    let mut scalars: Vec<(usize, ScalarKind, f64, Option<ScalarUnitText>)> = Vec::new();
    let mut pending: Vec<(i64, Vec<RowItems>)> = Vec::with_capacity(BATCH_ROWS);
    let mut n = 0usize;
    loop {
        line.clear();
        let got = input.read_line(&mut line)?;
        if got == 0 {
            break;
        }
        bytes += got as u64;
        n += 1;
        sum.lines = n;
        let text = line.trim_end_matches(['\n', '\r']);
        if text.trim().is_empty() || text.starts_with('#') {
            continue;
        }
        let Some(lay) = &layout else {
            let l = read_header(settings, text, n)?;
            analyses = l.components.iter().map(|&c| vec![None; c]).collect();
            a_quality = vec![SourceQuality::Good; l.reactors];
            a_present = vec![false; l.reactors];
            layout = Some(l);
            continue;
        };
        let cells: Vec<&str> = text.split(',').collect();
        let mut skip = |sum: &mut Summary, message: String| {
            let p = RowProblem { line: n, message };
            problem(&p);
            sum.skipped_total += 1;
            if sum.skipped.len() < KEEP_PROBLEMS {
                sum.skipped.push(p);
            }
        };
        if cells.len() != lay.columns.len() {
            skip(
                sum,
                format!(
                    "{} cells where the header has {} columns",
                    cells.len(),
                    lay.columns.len()
                ),
            );
            continue;
        }
        // Read and check every cell; nothing reaches the engine from a bad row.
        let mut time: Option<i64> = None;
        let mut bad: Option<String> = None;
        scalars.clear();
        s_quality.clear();
        for v in analyses.iter_mut() {
            v.fill(None);
        }
        a_present.fill(false);
        a_quality.fill(SourceQuality::Good);
        for (i, (col, cell)) in lay.columns.iter().zip(&cells).enumerate() {
            let cell = cell.trim();
            if cell.is_empty() {
                continue;
            }
            let not_number = || Some(format!("column {}: \"{cell}\" is not a number", i + 1));
            let not_quality = || {
                Some(format!(
                    "column {}: quality \"{cell}\" is not good, uncertain or bad",
                    i + 1
                ))
            };
            match *col {
                Column::Time => match parse_time(cell) {
                    Some(t) => time = Some(t),
                    None => {
                        bad = Some(format!(
                            "column {}: time \"{cell}\" is neither RFC 3339 nor epoch milliseconds",
                            i + 1
                        ))
                    }
                },
                Column::Scalar {
                    reactor,
                    kind,
                    unit_override,
                } => match number(cell) {
                    Some(v) => scalars.push((reactor, kind, v, unit_override)),
                    None => bad = not_number(),
                },
                Column::Component {
                    reactor,
                    index,
                    per_fraction,
                } => match number(cell) {
                    Some(v) => {
                        analyses[reactor][index] = Some(v * per_fraction);
                        a_present[reactor] = true;
                    }
                    None => bad = not_number(),
                },
                Column::ScalarQuality { reactor, kind } => match SourceQuality::parse(cell) {
                    Some(q) => s_quality.push((reactor, kind, q)),
                    None => bad = not_quality(),
                },
                Column::AnalyserQuality { reactor } => match SourceQuality::parse(cell) {
                    Some(q) => a_quality[reactor] = q,
                    None => bad = not_quality(),
                },
            }
            if bad.is_some() {
                break;
            }
        }
        if bad.is_none() && time.is_none() {
            bad = Some("no time".into());
        }
        if let (None, Some(t), Some(prev)) = (&bad, time, last_time) {
            if t < prev {
                bad = Some(format!(
                    "time {} is earlier than the row before ({})",
                    crate::timefmt::format_rfc3339(t),
                    crate::timefmt::format_rfc3339(prev)
                ));
            }
        }
        if let Some(m) = bad {
            skip(sum, m);
            continue;
        }
        let Some(t) = time else { continue };
        last_time = Some(t);
        sum.rows += 1;
        sum.first_ms.get_or_insert(t);
        sum.last_ms = Some(t);
        // The row's inputs, in the order the daemon takes them.
        let mut per_worker: Vec<RowItems> = (0..workers).map(|_| Vec::new()).collect();
        let mut order = 0u32;
        for &(r, kind, v, over) in &scalars {
            order += 1;
            let unit = match over {
                Some(ScalarUnitText::Temperature(u)) => ScalarUnit::Temperature(u),
                Some(ScalarUnitText::Pressure(u)) => ScalarUnit::Pressure(u),
                None => scalar_unit(settings, r, kind),
            };
            let quality = s_quality
                .iter()
                .find(|(qr, qk, _)| *qr == r && *qk == kind)
                .map_or(SourceQuality::Good, |x| x.2);
            sum.readings += 1;
            let value = match convert(v, &unit, None, settings.atmosphere_bar) {
                Ok(x) => x,
                Err(e) => {
                    metrics.decode_failures[e.reason_index()]
                        .fetch_add(1, std::sync::atomic::Ordering::Relaxed);
                    tracing::warn!(line = n, reactor = %settings.reactors[r].spec.id, error = %e, "reading refused");
                    continue;
                }
            };
            let reading = ScalarReading {
                ts_ms: t,
                value,
                quality,
            };
            let input = match kind {
                ScalarKind::Temperature(i) => Input::Temperature(i, reading),
                ScalarKind::Pressure => Input::Pressure(reading),
                ScalarKind::SteamRatio => Input::SteamRatio(reading),
            };
            per_worker[assign[r]].push((order, r, input));
        }
        for r in 0..lay.reactors {
            order += 1;
            if !a_present[r] {
                continue;
            }
            sum.readings += 1;
            let input = Input::Analysis(AnalysisReading {
                ts_ms: t,
                values: analyses[r].clone(),
                basis: None,
                quality: a_quality[r],
            });
            per_worker[assign[r]].push((order, r, input));
        }
        pending.push((t, per_worker));
        if pending.len() >= BATCH_ROWS {
            batch(std::mem::take(&mut pending), sum)?;
            progress(bytes);
        }
    }
    if layout.is_none() {
        return Err(ReplayError::NoHeader);
    }
    if !pending.is_empty() {
        batch(pending, sum)?;
    }
    progress(bytes);
    Ok(())
}

fn number(cell: &str) -> Option<f64> {
    cell.parse::<f64>().ok().filter(|v| v.is_finite())
}

fn write_record(out: &mut dyn Write, rec: &Append) -> std::io::Result<()> {
    // Topics are configuration text: letters, digits, `/`, `-`, `_`; still escaped.
    let topic = serde_json::to_string(&rec.topic).unwrap_or_else(|_| "\"\"".into());
    writeln!(
        out,
        "{{\"topic\":{topic},\"retain\":{},\"payload\":{}}}",
        rec.retain, rec.payload
    )
}

/// A `Write` that hands 1 MiB chunks to a writer thread.
struct Pipe {
    buf: Vec<u8>,
    tx: std::sync::mpsc::SyncSender<Vec<u8>>,
}

const CHUNK: usize = 1 << 20;

impl Pipe {
    fn new(tx: std::sync::mpsc::SyncSender<Vec<u8>>) -> Self {
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

/// A wet mole fraction on a dry basis, given the wet water fraction of the same gas:
/// y_dry = y_wet / (1 − y_H2O) (docs/domain.md §5, dry basis = the gas with its water knocked out).
/// `None` without a usable water fraction: a value on the wrong basis is not plotted.
fn dry(wet: Option<f64>, water: Option<f64>) -> Option<f64> {
    match (wet, water) {
        (Some(y), Some(w)) if (0.0..1.0).contains(&w) => Some(y / (1.0 - w)),
        _ => None,
    }
}

/// The plot of one reactor from its replay trace. The key component is plotted on the
/// analyser's basis: dry values are worked out from the wet ones and the water of the
/// same gas (measured gas: the water rebuilt from the steam ratio; equilibrium: its own).
pub fn reactor_plot(s: &Settings, r: usize, t: &Trace) -> crate::plot::ReactorPlot {
    use crate::composition::Basis;
    use crate::monitor::alarm::{Direction, EventKind};
    use crate::monitor::watch::{Class, Figure, Forecast};
    use crate::plot::{
        AggregatePoint, AlarmLimit, BaselineSpan, Marker, MarkerKind, OfflineSpan, PlotPoint,
        Projection, ReactorPlot,
    };
    let rs = &s.reactors[r];
    let on_dry = rs.spec.composition.basis == Basis::Dry;
    let points = t
        .points
        .iter()
        .map(|p| {
            let (mut km, mut ke) = (expand(p.key_measured), expand(p.key_equilibrium));
            let approach = expand(p.approach_k);
            if p.bad {
                // A bad analysis (e.g. calibration gas) is a gap here too, as on the approach.
                (km, ke) = (None, None);
            }
            if on_dry {
                km = dry(km, expand(p.water_measured));
                ke = dry(ke, expand(p.water_equilibrium));
            }
            PlotPoint {
                t_ms: p.t_ms,
                approach_k: approach,
                uncertainty_k: expand(p.uncertainty_k),
                good: p.good,
                key_measured: km,
                key_equilibrium: ke,
            }
        })
        .collect();
    let baselines = t
        .baselines
        .iter()
        .map(|b| BaselineSpan {
            from_ms: b.from_ms,
            to_ms: b.to_ms,
            approach_k: b.approach_k,
            sigma_k: Some(b.sigma_k),
        })
        .collect();
    let markers = t
        .events
        .iter()
        .filter_map(|e| {
            let kind = match (&e.kind, e.class) {
                (EventKind::Raised | EventKind::Realarmed, Class::Alarm) => MarkerKind::Alarm,
                (EventKind::Raised | EventKind::Realarmed, Class::Alert) => MarkerKind::Alert,
                (EventKind::Cleared, _) => MarkerKind::Cleared,
                (
                    EventKind::Acknowledged { .. }
                    | EventKind::Shelved { .. }
                    | EventKind::OutOfService { .. }
                    | EventKind::ReturnedToService { .. },
                    _,
                ) => MarkerKind::Operator,
                _ => return None,
            };
            let what = crate::wire::watch::event_name(&e.kind);
            let by = match &e.kind {
                EventKind::Acknowledged { by }
                | EventKind::Shelved { by, .. }
                | EventKind::OutOfService { by, .. }
                | EventKind::ReturnedToService { by } => format!(" by {by}"),
                _ => String::new(),
            };
            Some(Marker {
                t_ms: e.t_ms,
                kind,
                source: format!("{} {}", e.class.as_str(), e.alarm),
                label: format!("{what}{by}"),
            })
        })
        .collect();
    let alarm_limits = rs
        .spec
        .watch
        .alarms
        .iter()
        .filter(|a| a.figure == Figure::Approach && a.scale > 0.0)
        .map(|a| AlarmLimit {
            id: a.config.id.clone(),
            limit_k: a.config.limit / a.scale,
            high: a.config.direction == Direction::High,
        })
        .collect();
    let data_end = t.points.last().map(|p| p.t_ms);
    let offline = t
        .offline
        .iter()
        .filter_map(|&(from, to)| {
            let to = to.or(data_end.map(|e| e.max(from)))?;
            Some(OfflineSpan {
                from_ms: from,
                to_ms: to,
            })
        })
        .collect();
    // The current trend was fitted on the aggregates of the last run between its first
    // and last fitted points (a trend window may leave older ones out).
    let fitted = t.last_drift.and_then(|d| d.trend);
    let aggregates = t
        .aggregates
        .iter()
        .map(|&(t_ms, k)| AggregatePoint {
            t_ms,
            approach_k: k,
            in_fit: fitted.is_some_and(|f| {
                t_ms >= f.origin_ms && t_ms >= f.first_ms - 1 && t_ms <= f.last_ms + 1
            }),
        })
        .collect();
    let projection = t.last_drift.and_then(|d| {
        let tr = d.trend?;
        let day = 86_400_000.0;
        let (end, range) = match d.forecast {
            Forecast::At {
                at_ms,
                earliest_ms,
                latest_ms,
            } => (Some(at_ms), Some((earliest_ms, latest_ms.unwrap_or(at_ms)))),
            _ => (None, None),
        };
        let span = (tr.last_ms - tr.first_ms).max(1);
        // At most half the data span ahead: a far-off forecast must not squash the data
        // (the chart names the date when it is beyond).
        let data_span = t
            .points
            .first()
            .zip(t.points.last())
            .map_or(span, |(a, b)| (b.t_ms - a.t_ms).max(span));
        let to = end
            .unwrap_or(tr.last_ms + data_span / 4)
            .min(tr.last_ms + data_span / 2);
        let steps = 60;
        let pts = (0..=steps)
            .map(|i| {
                let tm = tr.first_ms + (to - tr.first_ms) * i / steps;
                let x = (tm - tr.origin_ms) as f64 / day;
                let y = tr.intercept_k + tr.slope_k_per_day * x;
                let b = tr.fit.band(x);
                (tm, y, y - b, y + b)
            })
            .collect();
        Some(Projection {
            points: pts,
            slope_k_per_day: tr.slope_k_per_day,
            end_of_run_ms: end,
            end_of_run_range_ms: range,
        })
    });
    ReactorPlot {
        reactor: rs.spec.id.clone(),
        title: format!("{} ({})", rs.spec.name, rs.spec.id),
        key_component: s.species.get(rs.spec.key_component).name.clone(),
        limit_k: rs.spec.watch.drift.end_of_run_limit_k,
        points,
        baselines,
        projection,
        markers,
        alarm_limits,
        offline,
        aggregates,
        aggregate_period_ms: rs.spec.watch.drift.aggregate_ms,
        key_basis: Some(rs.spec.composition.basis.as_str().to_string()),
    }
}

/// Writes `<reactor>.svg` per reactor and `overview.svg` into `dir`, times on the axes in
/// `tz`; returns the paths.
pub fn write_plots(
    s: &Settings,
    traces: &[Trace],
    dir: &std::path::Path,
    title: &str,
    tz: crate::plot::TimeZone,
) -> std::io::Result<Vec<std::path::PathBuf>> {
    std::fs::create_dir_all(dir)?;
    let plots: Vec<crate::plot::ReactorPlot> = traces
        .iter()
        .enumerate()
        .map(|(r, t)| reactor_plot(s, r, t))
        .collect();
    let mut paths = Vec::new();
    for p in &plots {
        let path = dir.join(format!("{}.svg", p.reactor));
        std::fs::write(&path, crate::plot::reactor_svg_tz(p, tz))?;
        paths.push(path);
    }
    let path = dir.join("overview.svg");
    std::fs::write(&path, crate::plot::overview_svg_tz(&plots, title, tz))?;
    paths.push(path);
    Ok(paths)
}

/// `eqwatch replay`: runs the file, writes the outputs, returns the summary text.
pub fn command(
    config: &std::path::Path,
    input: &std::path::Path,
    out: Option<&std::path::Path>,
    plot_dir: Option<&std::path::Path>,
    plot_tz: crate::plot::TimeZone,
    threads: Option<usize>,
) -> Result<String, crate::cli::CliError> {
    use crate::cli::CliError;
    use std::fmt::Write as _;
    use std::io::IsTerminal;
    let settings = crate::config::load(config)
        .map_err(|e| CliError::Input(format!("{}:\n{e}", config.display())))?;
    let settings = Arc::new(settings);
    let file = std::fs::File::open(input)
        .map_err(|e| CliError::Input(format!("{}: {e}", input.display())))?;
    let size = file.metadata().map(|m| m.len()).unwrap_or(0);
    let mut reader = std::io::BufReader::with_capacity(1 << 20, file);
    // Results are written by a second thread (the disk works while the next rows are
    // evaluated); the order is that of the records.
    let (mut sink, writer): (
        Box<dyn Write>,
        Option<std::thread::JoinHandle<std::io::Result<()>>>,
    ) = match out {
        Some(p) => {
            if let Some(d) = p.parent().filter(|d| !d.as_os_str().is_empty()) {
                std::fs::create_dir_all(d)
                    .map_err(|e| CliError::Input(format!("{}: {e}", d.display())))?;
            }
            let mut file = std::fs::File::create(p)
                .map_err(|e| CliError::Input(format!("{}: {e}", p.display())))?;
            let (tx, rx) = std::sync::mpsc::sync_channel::<Vec<u8>>(8);
            let handle = std::thread::Builder::new()
                .name("eqwatch-replay-writer".into())
                .spawn(move || {
                    for chunk in rx {
                        file.write_all(&chunk)?;
                    }
                    file.flush()
                })
                .map_err(|e| CliError::Internal(format!("writer thread: {e}")))?;
            (Box::new(Pipe::new(tx)), Some(handle))
        }
        None => (Box::new(std::io::sink()), None),
    };
    let mut replay = Replay::new(settings.clone(), plot_dir.is_some())
        .map_err(|e| CliError::Input(e.to_string()))?;
    if let Some(n) = threads {
        replay = replay.with_threads(n);
    }
    let started = std::time::Instant::now();
    let tty = std::io::stderr().is_terminal();
    let mut last_pct = u64::MAX;
    let mut progress = |b: u64| {
        if tty && size > 0 {
            let pct = b.saturating_mul(100) / size;
            if pct != last_pct {
                last_pct = pct;
                let bar = "#".repeat((pct / 4) as usize);
                eprint!("\rreplay [{bar:<25}] {pct:>3}%");
                if pct >= 100 {
                    eprintln!();
                }
            }
        }
    };
    let mut shown = 0usize;
    let mut problem = |p: &RowProblem| {
        if shown < 20 {
            if tty {
                eprint!("\r");
            }
            eprintln!("{}:{}: row skipped: {}", input.display(), p.line, p.message);
        } else if shown == 20 {
            eprintln!("(more skipped rows are counted in the summary)");
        }
        shown += 1;
    };
    let sum = replay
        .run(&mut reader, &mut sink, &mut progress, &mut problem)
        .map_err(|e| match e {
            ReplayError::Read(_) => CliError::Internal(format!("{}: {e}", input.display())),
            e => CliError::Input(format!("{}: {e}", input.display())),
        })?;
    sink.flush()
        .map_err(|e| CliError::Internal(format!("writing results: {e}")))?;
    drop(sink);
    if let Some(w) = writer {
        match w.join() {
            Ok(Ok(())) => {}
            Ok(Err(e)) => return Err(CliError::Internal(format!("writing results: {e}"))),
            Err(_) => return Err(CliError::Internal("the writer thread failed".into())),
        }
    }
    let elapsed = started.elapsed();
    let mut text = String::new();
    let fmt = |t: Option<i64>| t.map_or("-".to_string(), crate::timefmt::format_rfc3339);
    let _ = writeln!(
        text,
        "replayed {} rows ({} readings) from {} to {} in {:.2} s; {} rows skipped; {} records",
        sum.rows,
        sum.readings,
        fmt(sum.first_ms),
        fmt(sum.last_ms),
        elapsed.as_secs_f64(),
        sum.skipped_total,
        sum.records
    );
    let traces = replay.traces();
    let m = replay.metrics();
    use std::sync::atomic::Ordering::Relaxed;
    for (r, rs) in settings.reactors.iter().enumerate() {
        let rm = &m.reactors[r];
        let trend = f64::from_bits(rm.trend_k_per_day.load(Relaxed));
        let eor = f64::from_bits(rm.end_of_run_days.load(Relaxed));
        let _ = writeln!(
            text,
            "  {:<6} evaluations good {} / uncertain {} / bad {}; alarms raised {}, alerts raised {}; trend {}; end of run {}",
            rs.spec.id,
            rm.evaluations[0].load(Relaxed),
            rm.evaluations[1].load(Relaxed),
            rm.evaluations[2].load(Relaxed),
            rm.alarm_activations.load(Relaxed),
            rm.alerts_raised.load(Relaxed),
            if trend.is_finite() {
                format!("{trend:+.4} K/d")
            } else {
                "none".into()
            },
            if eor.is_finite() {
                format!("in {eor:.0} d")
            } else {
                "not forecast".into()
            },
        );
    }
    let _ = writeln!(
        text,
        "  alarm floods {}, chattering alerts {}, stale-alarm alerts {}",
        m.floods.load(Relaxed),
        m.chattering.load(Relaxed),
        m.stale.load(Relaxed)
    );
    if let Some(o) = out {
        let _ = writeln!(text, "results: {}", o.display());
    }
    if let (Some(dir), Some(traces)) = (plot_dir, traces) {
        let title = format!("{}: replay of {}", settings.site, input.display());
        let paths = write_plots(&settings, &traces, dir, &title, plot_tz)
            .map_err(|e| CliError::Input(format!("plots in {}: {e}", dir.display())))?;
        let _ = writeln!(text, "plots: {} files in {}", paths.len(), dir.display());
    }
    Ok(text)
}
