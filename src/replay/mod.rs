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

mod csv;
mod plots;
mod runner;

pub use plots::{reactor_plot, write_plots, write_svgs};
use runner::Pipe;
pub use runner::{Replay, Summary};

use std::io::Write;
use std::sync::Arc;
use thiserror::Error;

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
