//! `eqwatch report`: reads the JSON lines that `eqwatch replay --out` writes, or a daemon
//! journal segment (the same records with `seq` and `ts_ms` in front), line by line, into
//! `crate::report`'s per-day aggregates, and writes the HTML file. The file reading, the
//! clock and the configuration live here; the report itself does no I/O.
//!
//! Rules of this file (checked by `tests/architecture.rs`): the configuration (site and
//! reactors), the report, times; thiserror; no pipeline, daemon or demo.

use std::io::{BufRead, Write};
use std::path::{Path, PathBuf};

use thiserror::Error;

use crate::cli::CliError;
use crate::report::{Aggregator, LineError, Period, ReactorInfo, ReportMeta, render};
use crate::timefmt::parse_rfc3339;

/// What `eqwatch report` was asked to do.
#[derive(Debug, Clone)]
pub struct ReportArgs<'a> {
    pub config: &'a Path,
    pub input: &'a Path,
    pub out: &'a Path,
    /// RFC 3339 bounds of the period, `[from, to)`.
    pub from: Option<&'a str>,
    pub to: Option<&'a str>,
    /// Reactor ids to report (none: every configured reactor).
    pub reactors: &'a [String],
}

/// Everything that stops a report, naming the file (and line) to look at.
#[derive(Debug, Error)]
pub(crate) enum ReportError {
    #[error("{path}: {message}")]
    Config { path: PathBuf, message: String },
    #[error("--{flag} \"{value}\" is not an RFC 3339 time such as 2026-09-01T00:00:00Z")]
    BadTime { flag: &'static str, value: String },
    #[error("--from {from} is not before --to {to}")]
    EmptyPeriod { from: String, to: String },
    #[error("--reactor {0}: no such reactor in the configuration (it has {1})")]
    UnknownReactor(String, String),
    #[error("{path}: {source}")]
    Open {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("{path}:{line}: reading: {source}")]
    Read {
        path: PathBuf,
        line: u64,
        source: std::io::Error,
    },
    #[error("{path}:{line}: line skipped: {source}")]
    Malformed {
        path: PathBuf,
        line: u64,
        source: LineError,
    },
    #[error("{path}: writing the report: {source}")]
    Write {
        path: PathBuf,
        source: std::io::Error,
    },
}

impl From<ReportError> for CliError {
    fn from(e: ReportError) -> Self {
        match e {
            ReportError::Read { .. } | ReportError::Write { .. } => {
                CliError::Internal(e.to_string())
            }
            e => CliError::Input(e.to_string()),
        }
    }
}

fn time(flag: &'static str, value: Option<&str>) -> Result<Option<i64>, ReportError> {
    value
        .map(|v| {
            parse_rfc3339(v).ok_or_else(|| ReportError::BadTime {
                flag,
                value: v.to_string(),
            })
        })
        .transpose()
}

/// `eqwatch report`: writes the file, returns the one-line summary.
pub fn report(args: &ReportArgs<'_>, now_ms: i64) -> Result<String, CliError> {
    Ok(run(args, now_ms, &mut |e| eprintln!("eqwatch: {e}"))?)
}

fn run(
    args: &ReportArgs<'_>,
    now_ms: i64,
    warn: &mut dyn FnMut(&ReportError),
) -> Result<String, ReportError> {
    let settings = crate::config::load(args.config).map_err(|e| ReportError::Config {
        path: args.config.to_path_buf(),
        message: e.to_string(),
    })?;
    let period = Period {
        from_ms: time("from", args.from)?,
        to_ms: time("to", args.to)?,
    };
    if let (Some(f), Some(t)) = (period.from_ms, period.to_ms)
        && f >= t
    {
        return Err(ReportError::EmptyPeriod {
            from: args.from.unwrap_or_default().to_string(),
            to: args.to.unwrap_or_default().to_string(),
        });
    }
    let all: Vec<ReactorInfo> = settings
        .reactors
        .iter()
        .map(|r| ReactorInfo {
            id: r.spec.id.clone(),
            name: r.spec.name.clone(),
        })
        .collect();
    for want in args.reactors {
        if !all.iter().any(|r| &r.id == want) {
            let ids: Vec<&str> = all.iter().map(|r| r.id.as_str()).collect();
            return Err(ReportError::UnknownReactor(want.clone(), ids.join(", ")));
        }
    }
    let chosen = all
        .into_iter()
        .filter(|r| args.reactors.is_empty() || args.reactors.contains(&r.id))
        .collect();
    let mut agg = Aggregator::new(chosen, period);

    let path = args.input;
    let file = std::fs::File::open(path).map_err(|source| ReportError::Open {
        path: path.to_path_buf(),
        source,
    })?;
    let mut reader = std::io::BufReader::with_capacity(1 << 20, file);
    let mut buf = Vec::with_capacity(64 * 1024);
    let mut line = 0u64;
    let mut shown = 0u32;
    loop {
        buf.clear();
        let n = reader
            .read_until(b'\n', &mut buf)
            .map_err(|source| ReportError::Read {
                path: path.to_path_buf(),
                line: line + 1,
                source,
            })?;
        if n == 0 {
            break;
        }
        line += 1;
        let outcome = match std::str::from_utf8(&buf) {
            Ok(text) => agg.add_line(line, text.trim_end_matches(['\n', '\r'])),
            Err(_) => {
                agg.add_unreadable(line);
                Err(LineError::NotJson("not UTF-8 text".into()))
            }
        };
        if let Err(source) = outcome {
            // The first 20 on stderr; all are counted in the report.
            if shown < 20 {
                warn(&ReportError::Malformed {
                    path: path.to_path_buf(),
                    line,
                    source,
                });
            }
            shown += 1;
        }
    }

    let html = render(
        &agg,
        &ReportMeta {
            site: settings.site.clone(),
            input: path.display().to_string(),
            generated_at_ms: now_ms,
        },
    );
    let out = args.out;
    let write_err = |source| ReportError::Write {
        path: out.to_path_buf(),
        source,
    };
    if let Some(d) = out.parent().filter(|d| !d.as_os_str().is_empty()) {
        std::fs::create_dir_all(d).map_err(write_err)?;
    }
    let mut f = std::fs::File::create(out).map_err(write_err)?;
    f.write_all(html.as_bytes()).map_err(write_err)?;
    f.flush().map_err(write_err)?;
    let (lines, malformed) = agg.lines();
    Ok(format!(
        "report: {} ({} lines read, {} results in the period, {} malformed lines skipped)\n",
        out.display(),
        lines,
        agg.results(),
        malformed
    ))
}
