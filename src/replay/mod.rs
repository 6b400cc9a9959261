//! Replay of plant history: a CSV of timestamped readings run through the daemon's own
//! processing path (`pipeline::Engine`: alignment, quality, evaluation,
//! drift, alerts, alarms), deterministically, writing the records the daemon would
//! publish and the traces for plots.
//!
//! Rules of this folder (checked by `tests/architecture.rs`): the core, the
//! configuration, the pipeline, the wire formats and the charts; never the daemon
//! (replay builds without tokio) or the demo. Files and threads are std only.
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
//! # The outputs
//! `--format jsonl` (the default): every record the daemon would publish, one JSON
//! object per line, in the daemon's order (metrics messages too, when the configuration
//! has `metrics_topic = true`). `--format csv`: `--out` is a folder, and each reactor
//! gets `<reactor>.csv` with a row per result ([`table`]); the other records are left
//! out.
//!
//! Within a row, readings go to the engine in column order for scalars, then one
//! analysis per analyser, reactors in configuration order; then the watch timers tick
//! to the row's time.

mod csv;
mod plots;
mod runner;
mod table;

pub use plots::{reactor_plot, write_plots, write_svgs};
use runner::Pipe;
pub use runner::{Replay, Summary};

use std::fmt::Write as _;
use std::io::{IsTerminal, Write};
use std::path::Path;
use std::sync::Arc;

use thiserror::Error;

use crate::cli::CliError;
use crate::config::Settings;
use crate::pipeline::metrics::Metrics;

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

/// What `eqwatch replay` was asked to do.
#[derive(Debug, Clone)]
pub struct ReplayArgs<'a> {
    pub config: &'a Path,
    pub input: &'a Path,
    /// The JSON lines file of every record, or the folder of the CSVs, if wanted.
    pub out: Option<&'a Path>,
    pub format: OutputFormat,
    /// The folder for SVG plots, if wanted.
    pub plot_dir: Option<&'a Path>,
    pub plot_tz: crate::plot::TimeZone,
    /// Worker threads (default: the machine's cores).
    pub threads: Option<usize>,
}

/// What `--out` receives.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum OutputFormat {
    /// One file, every record as a JSON line.
    #[default]
    JsonLines,
    /// A folder with one CSV of results per reactor.
    Csv,
}

impl OutputFormat {
    /// `jsonl` or `csv`, as given on the command line.
    pub fn parse(text: &str) -> Result<Self, String> {
        match text {
            "jsonl" => Ok(Self::JsonLines),
            "csv" => Ok(Self::Csv),
            other => Err(format!(
                "\"{other}\" is not an output format; give jsonl (every record as JSON lines) or csv (a CSV of results per reactor)"
            )),
        }
    }
}

/// `eqwatch replay`: runs the file, writes the outputs, returns the summary text.
pub fn command(args: &ReplayArgs<'_>) -> Result<String, CliError> {
    let input = args.input;
    let settings = crate::config::load(args.config)
        .map_err(|e| CliError::Input(format!("{}:\n{e}", args.config.display())))?;
    let settings = Arc::new(settings);
    let file = std::fs::File::open(input)
        .map_err(|e| CliError::Input(format!("{}: {e}", input.display())))?;
    let size = file.metadata().map(|m| m.len()).unwrap_or(0);
    let mut reader = std::io::BufReader::with_capacity(1 << 20, file);
    if args.format == OutputFormat::Csv && args.out.is_none() {
        return Err(CliError::Input(
            "--format csv writes into the folder given with --out; add --out <folder>".into(),
        ));
    }
    let mut replay = Replay::new(settings.clone(), args.plot_dir.is_some())
        .map_err(|e| CliError::Input(e.to_string()))?;
    if let Some(n) = args.threads {
        replay = replay.with_threads(n);
    }
    let started = std::time::Instant::now();
    let tty = std::io::stderr().is_terminal();
    let mut progress = progress_bar(tty, size);
    let mut problem = row_reporter(tty, input);
    let in_error = |e: ReplayError| match e {
        ReplayError::Read(_) => CliError::Internal(format!("{}: {e}", input.display())),
        e => CliError::Input(format!("{}: {e}", input.display())),
    };
    let (sum, written) = match (args.format, args.out) {
        (OutputFormat::Csv, Some(dir)) => {
            let (mut files, paths) = csv_files(&settings, dir)?;
            let sum = replay
                .run_tables(&mut reader, &mut files, &mut progress, &mut problem)
                .map_err(in_error)?;
            for (f, p) in files.iter_mut().zip(&paths) {
                f.flush()
                    .map_err(|e| CliError::Internal(format!("{}: {e}", p.display())))?;
            }
            let what = format!("{} CSV files in {}", paths.len(), dir.display());
            (sum, Some(what))
        }
        (_, out) => {
            let mut results = ResultsFile::open(out)?;
            let sum = replay
                .run(&mut reader, &mut results.sink, &mut progress, &mut problem)
                .map_err(in_error)?;
            results.finish()?;
            (sum, out.map(|o| o.display().to_string()))
        }
    };
    let mut text = summary_text(&settings, &sum, replay.metrics(), started.elapsed());
    if let Some(w) = written {
        let _ = writeln!(text, "results: {w}");
    }
    if let (Some(dir), Some(traces)) = (args.plot_dir, replay.traces()) {
        let title = format!("{}: replay of {}", settings.site, input.display());
        let paths = write_plots(&settings, &traces, dir, &title, args.plot_tz)
            .map_err(|e| CliError::Input(format!("plots in {}: {e}", dir.display())))?;
        let _ = writeln!(text, "plots: {} files in {}", paths.len(), dir.display());
    }
    Ok(text)
}

/// `<dir>/<reactor>.csv` for every reactor, created (the folder too), buffered.
#[allow(clippy::type_complexity)]
fn csv_files(
    settings: &Settings,
    dir: &Path,
) -> Result<(Vec<Box<dyn Write>>, Vec<std::path::PathBuf>), CliError> {
    std::fs::create_dir_all(dir).map_err(|e| {
        CliError::Input(format!(
            "{}: {e} (with --format csv, --out is a folder)",
            dir.display()
        ))
    })?;
    let mut files: Vec<Box<dyn Write>> = Vec::with_capacity(settings.reactors.len());
    let mut paths = Vec::with_capacity(settings.reactors.len());
    for r in &settings.reactors {
        let p = dir.join(format!("{}.csv", r.spec.id));
        let f = std::fs::File::create(&p)
            .map_err(|e| CliError::Input(format!("{}: {e}", p.display())))?;
        files.push(Box::new(std::io::BufWriter::with_capacity(1 << 20, f)));
        paths.push(p);
    }
    Ok((files, paths))
}

/// Where the records go: a file written by a second thread (the disk works while the
/// next rows are evaluated; the order is that of the records), or nowhere.
struct ResultsFile {
    sink: Box<dyn Write>,
    writer: Option<std::thread::JoinHandle<std::io::Result<()>>>,
}

impl ResultsFile {
    fn open(out: Option<&Path>) -> Result<Self, CliError> {
        let Some(p) = out else {
            return Ok(Self {
                sink: Box::new(std::io::sink()),
                writer: None,
            });
        };
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
        Ok(Self {
            sink: Box::new(Pipe::new(tx)),
            writer: Some(handle),
        })
    }

    /// Flushes and waits for the writer: every record is on disk, or the error says why.
    fn finish(self) -> Result<(), CliError> {
        let Self { mut sink, writer } = self;
        sink.flush()
            .map_err(|e| CliError::Internal(format!("writing results: {e}")))?;
        drop(sink);
        match writer.map(std::thread::JoinHandle::join) {
            None | Some(Ok(Ok(()))) => Ok(()),
            Some(Ok(Err(e))) => Err(CliError::Internal(format!("writing results: {e}"))),
            Some(Err(_)) => Err(CliError::Internal("the writer thread failed".into())),
        }
    }
}

/// A percentage bar on a terminal's stderr (nothing when stderr is not a terminal).
fn progress_bar(tty: bool, size: u64) -> impl FnMut(u64) {
    let mut last_pct = u64::MAX;
    move |bytes: u64| {
        if !tty || size == 0 {
            return;
        }
        let pct = bytes.saturating_mul(100) / size;
        if pct != last_pct {
            last_pct = pct;
            let bar = "#".repeat((pct / 4) as usize);
            eprint!("\rreplay [{bar:<25}] {pct:>3}%");
            if pct >= 100 {
                eprintln!();
            }
        }
    }
}

/// The first 20 skipped rows on stderr with their line; the rest are counted.
fn row_reporter(tty: bool, input: &Path) -> impl FnMut(&RowProblem) + '_ {
    let mut shown = 0usize;
    move |p: &RowProblem| {
        if shown < 20 {
            if tty {
                eprint!("\r");
            }
            eprintln!("{}:{}: row skipped: {}", input.display(), p.line, p.message);
        } else if shown == 20 {
            eprintln!("(more skipped rows are counted in the summary)");
        }
        shown += 1;
    }
}

/// The summary: rows, readings and time span, then per reactor the evaluations by
/// quality, alarms, alerts, trend and end of run, then the plant-wide counts.
fn summary_text(
    settings: &Settings,
    sum: &Summary,
    m: &Metrics,
    elapsed: std::time::Duration,
) -> String {
    use std::sync::atomic::Ordering::Relaxed;
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
    for (rs, rm) in settings.reactors.iter().zip(&m.reactors) {
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
    text
}
