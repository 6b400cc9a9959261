//! Writes invented plant history for the demo plant (Brackwater Ammonia Works, train 1)
//! as CSV for `eqwatch replay`: one row per minute, every input of
//! config/demo-plant.toml, with the year scenario of `eqwatch::demo::sim::YEAR_SCENARIO`.
//!
//! ```text
//! cargo run --release --example gen_history -- [--start 2026-01-01T00:00:00Z] [--days 365]
//!     [--seed 20260101] [--out var/history/baw1-history.csv] [--threads 0] [--no-noise]
//! ```
//!
//! The same arguments give the same bytes (the thread count does not matter).

use std::fs::File;
use std::io::{BufWriter, Write};
use std::path::PathBuf;
use std::process::ExitCode;
use std::time::Instant;

use eqwatch::demo::sim::{HistoryOptions, write_history_with_progress};
use eqwatch::timefmt::parse_rfc3339;

const USAGE: &str = "\
usage: gen_history [--start RFC3339] [--days N] [--first-day N] [--seed N] [--out PATH] [--threads N] [--no-noise]
  --start    first row's time, whole seconds, UTC or with an offset (default 2026-01-01T00:00:00Z)
  --days     days of history, 1 or more (default 365)
  --first-day  write the scenario from this day on (default 0; day 0 is at --start)
  --seed     noise seed (default 20260101)
  --out      CSV file to write; its folder is created (default var/history/baw1-history.csv)
  --threads  worker threads, 0 for all cores (default 0); the output does not depend on it
  --no-noise noise-free instruments";

struct Args {
    opts: HistoryOptions,
    out: PathBuf,
}

fn parse_args(mut it: impl Iterator<Item = String>) -> Result<Option<Args>, String> {
    let mut opts = HistoryOptions::default();
    let mut out = PathBuf::from("var/history/baw1-history.csv");
    while let Some(arg) = it.next() {
        let mut value = |name: &str| it.next().ok_or_else(|| format!("{name} needs a value"));
        match arg.as_str() {
            "-h" | "--help" => return Ok(None),
            "--start" => {
                let v = value("--start")?;
                let ms = parse_rfc3339(&v)
                    .ok_or_else(|| format!("--start: {v:?} is not an RFC 3339 time"))?;
                if ms % 1000 != 0 {
                    return Err(format!("--start: {v:?} is not a whole second"));
                }
                opts.start_epoch_s = ms / 1000;
            }
            "--days" => {
                let v = value("--days")?;
                opts.days = v.parse().ok().filter(|d| *d >= 1).ok_or_else(|| {
                    format!("--days: {v:?} is not a whole number of days, 1 or more")
                })?;
            }
            "--first-day" => {
                let v = value("--first-day")?;
                opts.first_day = v
                    .parse()
                    .map_err(|_| format!("--first-day: {v:?} is not a whole number of days"))?;
            }
            "--seed" => {
                let v = value("--seed")?;
                opts.seed = v
                    .parse()
                    .map_err(|_| format!("--seed: {v:?} is not a number from 0 to 2^64-1"))?;
            }
            "--out" => out = PathBuf::from(value("--out")?),
            "--threads" => {
                let v = value("--threads")?;
                opts.threads = v
                    .parse()
                    .map_err(|_| format!("--threads: {v:?} is not a number"))?;
            }
            "--no-noise" => opts.noise = false,
            other => return Err(format!("unknown argument {other:?}")),
        }
    }
    Ok(Some(Args { opts, out }))
}

fn run(args: Args) -> Result<(), String> {
    if let Some(dir) = args.out.parent().filter(|d| !d.as_os_str().is_empty()) {
        std::fs::create_dir_all(dir).map_err(|e| format!("{}: {e}", dir.display()))?;
    }
    let file = File::create(&args.out).map_err(|e| format!("{}: {e}", args.out.display()))?;
    let mut w = BufWriter::with_capacity(1 << 20, file);
    let began = Instant::now();
    let mut next_report = 10u64;
    let mut progress = |done: u64, total: u64| {
        let pct = done * 100 / total.max(1);
        if pct >= next_report {
            eprintln!(
                "gen_history: {pct:3} %  {done} of {total} rows  {:.1} s",
                began.elapsed().as_secs_f64()
            );
            while next_report <= pct {
                next_report += 10;
            }
        }
    };
    let stats = write_history_with_progress(&args.opts, &mut w, &mut progress)
        .map_err(|e| format!("{}: {e}", args.out.display()))?;
    w.flush()
        .map_err(|e| format!("{}: {e}", args.out.display()))?;
    eprintln!(
        "gen_history: wrote {} rows ({} analyses, {} values, {} bytes) to {} in {:.1} s",
        stats.rows,
        stats.analyses,
        stats.values,
        stats.bytes,
        args.out.display(),
        began.elapsed().as_secs_f64()
    );
    Ok(())
}

fn main() -> ExitCode {
    match parse_args(std::env::args().skip(1)) {
        Ok(None) => {
            println!("{USAGE}");
            ExitCode::SUCCESS
        }
        Ok(Some(args)) => match run(args) {
            Ok(()) => ExitCode::SUCCESS,
            Err(e) => {
                eprintln!("gen_history: {e}");
                ExitCode::FAILURE
            }
        },
        Err(e) => {
            eprintln!("gen_history: {e}\n{USAGE}");
            ExitCode::from(2)
        }
    }
}
