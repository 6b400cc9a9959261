//! eqwatch command line: parse, set up, call the library, print once.

use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::Context;
use clap::{Parser, Subcommand};
use eqwatch::cli::{self, BalanceInput, CalcInput, CliError, EquilibriumInput, StreamText};
use eqwatch::thermo::species::SpeciesDb;

/// Approach to chemical equilibrium for catalytic reactors (advisory only).
#[derive(Parser, Debug)]
#[command(name = "eqwatch", version, about, long_about = None)]
struct Args {
    /// Extra species file(s) (TOML); entries replace built-in species of the same name.
    #[arg(long = "species-file", global = true)]
    species_files: Vec<PathBuf>,
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand, Debug)]
enum Command {
    /// K(T) of a reaction and, with a composition, Q, Q/K and the approach to equilibrium.
    Calc {
        /// Reaction, e.g. "N2 + 3 H2 = 2 NH3" (repeat for several; the first is reported on top).
        #[arg(long = "reaction", required = true)]
        reactions: Vec<String>,
        /// K source: species-data, moe-1962, xu-froment-1989, gillespie-beattie-1930, graaf-1986.
        #[arg(long = "k-source")]
        k_sources: Vec<String>,
        /// Temperature with its unit, e.g. "700 K" or "426.85 degC".
        #[arg(long, allow_hyphen_values = true)]
        temperature: String,
        /// Pressure with its unit: bar/bara (absolute), barg (gauge), kPa, MPa, psia, psig, atm.
        #[arg(long)]
        pressure: Option<String>,
        /// Composition, e.g. "H2=60,N2=20,NH3=15,Ar=3,CH4=2"; a value may carry its own unit ("CO=5ppm").
        #[arg(long)]
        composition: Option<String>,
        /// Default unit of the composition values: mol%, fraction, ppm.
        #[arg(long, default_value = "mol%")]
        composition_unit: String,
        /// Analyser basis: wet or dry.
        #[arg(long, default_value = "wet")]
        basis: String,
        /// Steam-to-dry-gas ratio (mol H2O per mol dry gas) for a dry-basis analysis.
        #[arg(long)]
        steam_ratio: Option<f64>,
        /// Water of the wet gas for a dry-basis analysis, e.g. "38.9 mol%".
        #[arg(long)]
        water: Option<String>,
        /// Fugacity model: ideal or peng-robinson.
        #[arg(long, default_value = "ideal")]
        eos: String,
        /// ± inputs, e.g. "temperature=2K,pressure=0.5bar,composition=2%,steam-ratio=5%".
        #[arg(long)]
        uncertainty: Option<String>,
        /// Band of |ln(Q/K)| reported as "at equilibrium".
        #[arg(long)]
        band: Option<f64>,
        /// How far the analysis may sum from 100 % before it is refused.
        #[arg(long, default_value = "2 mol%")]
        sum_tolerance: String,
        /// Key component for the equilibrium slip (default: first reactant).
        #[arg(long)]
        key: Option<String>,
        /// Also report how the equilibrium slip moves with T, P and steam.
        #[arg(long)]
        sensitivity: bool,
        /// Site atmospheric pressure for gauge readings (default 1.01325 bar).
        #[arg(long)]
        atmosphere: Option<String>,
        /// Print one JSON object instead of a table.
        #[arg(long)]
        json: bool,
    },
    /// Equilibrium composition of a feed at T and P.
    Equilibrium {
        /// Species that may react, e.g. "CH4,H2O,CO,CO2,H2".
        #[arg(long)]
        species: String,
        /// Feed moles, e.g. "CH4=1,H2O=3".
        #[arg(long)]
        feed: String,
        #[arg(long, allow_hyphen_values = true)]
        temperature: String,
        #[arg(long)]
        pressure: String,
        /// Species that do not react, e.g. "Ar".
        #[arg(long)]
        inert: Option<String>,
        #[arg(long, default_value = "ideal")]
        eos: String,
        /// Use these reactions' K instead of species data (must cover every species).
        #[arg(long = "reaction")]
        reactions: Vec<String>,
        #[arg(long = "k-source")]
        k_sources: Vec<String>,
        #[arg(long)]
        json: bool,
    },
    /// Element balances (C, H, O, N, Ar, ...) of an inlet and an outlet stream, their
    /// reconciliation, the global and measurement tests and the suspect instrument.
    Balance {
        /// The two streams as a JSON file (shape in the README); or the options below.
        #[arg(long)]
        input: Option<PathBuf>,
        /// Inlet dry analysis, mole fractions of every dry species, e.g.
        /// "CH4=0.95,CO2=0.01,H2=0.02,N2=0.02" (a value may carry a unit; "X=?" by difference).
        #[arg(long)]
        inlet_dry: Option<String>,
        /// Inlet dry gas flow, kmol/h, or "unmeasured".
        #[arg(long)]
        inlet_flow: Option<String>,
        /// Inlet water/steam flow, kmol/h, or "unmeasured"; left out: no water.
        #[arg(long)]
        inlet_water: Option<String>,
        /// Outlet dry analysis (as --inlet-dry).
        #[arg(long)]
        outlet_dry: Option<String>,
        /// Outlet dry gas flow, kmol/h, or "unmeasured".
        #[arg(long)]
        outlet_flow: Option<String>,
        /// Outlet water flow, kmol/h, or "unmeasured"; left out: no water.
        #[arg(long)]
        outlet_water: Option<String>,
        /// One σ of a flow, % of reading (default 1).
        #[arg(long)]
        sigma_flow_pct: Option<f64>,
        /// One σ of an analysed fraction, % of reading (default 1) ...
        #[arg(long)]
        sigma_fraction_pct: Option<f64>,
        /// ... and never below this mole fraction (default 0.0002).
        #[arg(long)]
        sigma_fraction_floor: Option<f64>,
        /// Significance of the global and measurement tests together, e.g. "5 %" (default).
        #[arg(long)]
        significance: Option<String>,
        #[arg(long)]
        json: bool,
    },
    /// The species library: names, ranges, standard state, sources.
    Species {
        #[arg(long)]
        json: bool,
    },
    /// Check a plant configuration: every problem with its key path, or a plant summary.
    Check {
        #[arg(long)]
        config: PathBuf,
    },
    /// Run the monitoring daemon on a plant configuration.
    #[cfg(feature = "daemon")]
    Run {
        #[arg(long)]
        config: PathBuf,
        /// Override the configured broker, e.g. mqtt://127.0.0.1:1883.
        #[arg(long)]
        broker: Option<String>,
        #[command(flatten)]
        log: LogArgs,
    },
    /// Make a password hash for `[http.users.<name>] password_hash` (the live page's
    /// logins): reads the password from standard input (one line), prints the hash.
    #[cfg(feature = "daemon")]
    HashPassword {
        /// PBKDF2 iterations (the default is OWASP's 2023 figure for PBKDF2-HMAC-SHA256).
        #[arg(long, default_value_t = eqwatch::web::auth::DEFAULT_ITERATIONS)]
        iterations: u32,
    },
    /// Run a CSV of plant history through the daemon's processing path; results and plots.
    Replay {
        #[arg(long)]
        config: PathBuf,
        /// CSV of timestamped readings (format in the README).
        #[arg(long)]
        input: PathBuf,
        /// Write every record the daemon would publish, one JSON object per line (with
        /// --format csv: the folder for one CSV of results per reactor).
        #[arg(long)]
        out: Option<PathBuf>,
        /// What --out receives: jsonl (every record, one JSON object per line) or csv
        /// (a folder with <reactor>.csv, a row per result, for a spreadsheet).
        #[arg(long, default_value = "jsonl")]
        format: String,
        /// Write SVG plots (one per reactor and an overview) into this folder.
        #[arg(long)]
        plot: Option<PathBuf>,
        /// Time zone of the plots' time axes and event lists: UTC or a fixed offset such
        /// as +01:00 or -05:30 (no named zones, no summer time).
        #[arg(long, default_value = "UTC")]
        plot_tz: String,
        /// Worker threads for the reactors (default: the machine's cores). The output
        /// does not depend on it.
        #[arg(long)]
        threads: Option<usize>,
        /// Log level (default error: the summary gives the counts).
        #[arg(long, default_value = "error")]
        log_level: String,
    },
    /// A period's catalyst report as one printable HTML file, from the JSON lines that
    /// `replay --out` writes (or a daemon journal segment).
    Report {
        #[arg(long)]
        config: PathBuf,
        /// JSON lines of records (`replay --out`, or a journal segment).
        #[arg(long)]
        input: PathBuf,
        /// The HTML file to write.
        #[arg(long)]
        out: PathBuf,
        /// Start of the period (RFC 3339, included; default: the first record).
        #[arg(long)]
        from: Option<String>,
        /// End of the period (RFC 3339, excluded; default: after the last record).
        #[arg(long)]
        to: Option<String>,
        /// Report only this reactor (repeat for more; default: every reactor).
        #[arg(long = "reactor")]
        reactors: Vec<String>,
    },
    /// The one-command demo: embedded broker, simulated plant, the daemon, a live table.
    ///
    /// The demo works in a folder of its own: the daemon's journal (var/journal), its log
    /// (eqwatch.log: the live table owns the terminal, so nothing is logged on it) and,
    /// if the folder is kept, SVG plots of the run (plots/). By default that is a new
    /// temporary folder, removed at exit with no plots written; --keep keeps it, and a
    /// folder given with --workdir is always kept. After a failure the folder is kept
    /// for its log. The folder is named at the start and at the end.
    #[cfg(feature = "demo-broker")]
    Demo {
        /// Simulated seconds per wall-clock second.
        #[arg(long, default_value_t = 60.0)]
        speed: f64,
        /// How long to run, e.g. "90 s" or "3 min" (wall clock).
        #[arg(long, default_value = "90 s")]
        duration: String,
        /// Use this broker instead of the embedded one, e.g. mqtt://127.0.0.1:1883.
        #[arg(long)]
        broker: Option<String>,
        /// Work in this folder (new or empty; kept, with the log and plots) instead of a
        /// temporary one.
        #[arg(long)]
        workdir: Option<PathBuf>,
        /// Keep the temporary folder (journal, log, plots) at exit.
        #[arg(long)]
        keep: bool,
        /// Serve the live page (and the metrics) on this address, e.g. 127.0.0.1:9873;
        /// off by default. The demo plant has no page users: the page is view only.
        #[arg(long)]
        page: Option<std::net::SocketAddr>,
        #[command(flatten)]
        log: LogArgs,
    },
}

#[derive(clap::Args, Debug, Clone)]
struct LogArgs {
    /// Log format: text or json (one object per line, for journald and log shippers).
    #[arg(long, default_value = "text")]
    log_format: String,
    /// Log level: error, warn, info, debug, trace.
    #[arg(long, default_value = "info")]
    log_level: String,
}

/// Sets up logging: on stderr (colour only on a terminal), or into `file` (no colour).
fn init_tracing(log: &LogArgs, file: Option<&std::path::Path>) -> Result<(), CliError> {
    let level: tracing::Level = log.log_level.parse().map_err(|_| {
        CliError::Input(format!(
            "--log-level `{}`: expected error, warn, info, debug or trace",
            log.log_level
        ))
    })?;
    use tracing_subscriber::layer::SubscriberExt;
    use tracing_subscriber::util::SubscriberInitExt;
    // The embedded demo broker logs every connection (and our readiness probe as an
    // error); it is quiet unless debugging.
    let broker_level = if level >= tracing::Level::DEBUG {
        tracing_subscriber::filter::LevelFilter::from_level(level)
    } else {
        tracing_subscriber::filter::LevelFilter::OFF
    };
    let filter = tracing_subscriber::filter::Targets::new()
        .with_default(level)
        .with_target("rumqttd", broker_level);
    use std::io::IsTerminal;
    use tracing_subscriber::fmt::writer::BoxMakeWriter;
    let json = match log.log_format.as_str() {
        "text" => false,
        "json" => true,
        other => {
            return Err(CliError::Input(format!(
                "--log-format `{other}`: expected text or json"
            )));
        }
    };
    let (writer, ansi) = match file {
        Some(path) => {
            let f = std::fs::OpenOptions::new()
                .create(true)
                .append(true)
                .open(path)
                .map_err(|e| CliError::Internal(format!("log file {}: {e}", path.display())))?;
            (BoxMakeWriter::new(std::sync::Mutex::new(f)), false)
        }
        None => (
            BoxMakeWriter::new(std::io::stderr),
            std::io::stderr().is_terminal(),
        ),
    };
    let result = if json {
        tracing_subscriber::registry()
            .with(tracing_subscriber::fmt::layer().json().with_writer(writer))
            .with(filter)
            .try_init()
    } else {
        tracing_subscriber::registry()
            .with(
                tracing_subscriber::fmt::layer()
                    .with_writer(writer)
                    .with_ansi(ansi)
                    .with_target(false),
            )
            .with(filter)
            .try_init()
    };
    result.map_err(|e| CliError::Internal(format!("logging: {e}")))
}

fn load_config(path: &std::path::Path) -> Result<eqwatch::config::Settings, CliError> {
    eqwatch::config::load(path).map_err(|e| CliError::Input(format!("{}:\n{e}", path.display())))
}

/// Resolves on SIGINT or SIGTERM.
#[cfg(feature = "daemon")]
async fn shutdown_signal() {
    let ctrl_c = tokio::signal::ctrl_c();
    #[cfg(unix)]
    {
        match tokio::signal::unix::signal(tokio::signal::unix::SignalKind::terminate()) {
            Ok(mut term) => {
                tokio::select! {
                    _ = ctrl_c => {}
                    _ = term.recv() => {}
                }
            }
            Err(_) => {
                let _ = ctrl_c.await;
            }
        }
    }
    #[cfg(not(unix))]
    {
        let _ = ctrl_c.await;
    }
}

#[cfg(feature = "daemon")]
fn runtime() -> Result<tokio::runtime::Runtime, CliError> {
    tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .map_err(|e| CliError::Internal(format!("tokio runtime: {e}")))
}

#[cfg(feature = "daemon")]
fn run_daemon(
    config: &std::path::Path,
    broker: Option<String>,
    log: &LogArgs,
) -> Result<(), CliError> {
    init_tracing(log, None)?;
    let mut settings = load_config(config)?;
    if let Some(url) = &broker {
        eqwatch::config::override_broker(&mut settings, url)
            .map_err(|e| CliError::Input(format!("--broker: {e}")))?;
    }
    let rt = runtime()?;
    let config = config.to_path_buf();
    rt.block_on(async move {
        let cancel = tokio_util::sync::CancellationToken::new();
        let c = cancel.clone();
        tokio::spawn(async move {
            shutdown_signal().await;
            tracing::info!("signal received: shutting down");
            c.cancel();
        });
        let (tx, reloads) = tokio::sync::mpsc::channel(1);
        tokio::spawn(reload_on_hangup(config, broker, tx));
        let control = eqwatch::daemon::Control {
            reloads,
            notifier: eqwatch::daemon::notify::Notifier::from_env(),
        };
        eqwatch::daemon::run(
            std::sync::Arc::new(settings),
            cancel,
            eqwatch::daemon::wall_clock(),
            control,
        )
        .await
        .map_err(|e| CliError::Input(format!("{e:#}")))
    })
}

/// On every SIGHUP, reads and validates the configuration file again (with the same
/// `--broker` override) and hands the result to the daemon, which applies it or refuses
/// it and keeps the running one.
#[cfg(feature = "daemon")]
async fn reload_on_hangup(
    config: PathBuf,
    broker: Option<String>,
    tx: tokio::sync::mpsc::Sender<eqwatch::daemon::ReloadRequest>,
) {
    #[cfg(unix)]
    {
        use tokio::signal::unix::{SignalKind, signal};
        let Ok(mut hup) = signal(SignalKind::hangup()) else {
            tracing::warn!("SIGHUP cannot be watched: configuration reloads need a restart");
            return;
        };
        while hup.recv().await.is_some() {
            tracing::info!(file = %config.display(), "SIGHUP: reading the configuration again");
            let (path, url) = (config.clone(), broker.clone());
            let loaded = tokio::task::spawn_blocking(move || {
                let mut s = eqwatch::config::load(&path)
                    .map_err(|e| format!("{}:\n{e}", path.display()))?;
                if let Some(url) = url {
                    eqwatch::config::override_broker(&mut s, &url)
                        .map_err(|e| format!("--broker: {e}"))?;
                }
                Ok(s)
            })
            .await
            .unwrap_or_else(|e| Err(format!("reading the configuration: {e}")));
            if tx.send(loaded).await.is_err() {
                return;
            }
        }
    }
    #[cfg(not(unix))]
    {
        let _ = (config, broker, tx);
    }
}

fn load_species(files: &[PathBuf]) -> anyhow::Result<SpeciesDb> {
    let mut db = SpeciesDb::builtin();
    for f in files {
        let text = std::fs::read_to_string(f)
            .with_context(|| format!("reading species file {}", f.display()))?;
        db.merge_toml(&text, &f.display().to_string())?;
    }
    Ok(db)
}

fn run(args: Args) -> Result<(serde_json::Value, bool), CliError> {
    let db = load_species(&args.species_files).map_err(|e| CliError::Input(format!("{e:#}")))?;
    match args.command {
        Command::Calc {
            reactions,
            k_sources,
            temperature,
            pressure,
            composition,
            composition_unit,
            basis,
            steam_ratio,
            water,
            eos,
            uncertainty,
            band,
            sum_tolerance,
            key,
            sensitivity,
            atmosphere,
            json,
        } => {
            let inp = CalcInput {
                reactions,
                k_sources,
                temperature,
                pressure,
                composition,
                composition_unit,
                basis,
                steam_ratio,
                water,
                eos,
                uncertainty,
                band_ln: band,
                sum_tolerance,
                key,
                sensitivity,
                atmosphere,
            };
            let unit = cli::temperature_unit_of(&inp.temperature);
            let v = cli::calc(&db, &inp)?;
            // Out-of-range warnings go to stderr whatever the output format.
            for w in v["warnings"].as_array().into_iter().flatten() {
                eprintln!("eqwatch: warning: {}", w.as_str().unwrap_or_default());
            }
            if json {
                Ok((v, true))
            } else {
                Ok((serde_json::Value::String(cli::calc_table(&v, unit)), false))
            }
        }
        Command::Equilibrium {
            species,
            feed,
            temperature,
            pressure,
            inert,
            eos,
            reactions,
            k_sources,
            json,
        } => {
            let inp = EquilibriumInput {
                species,
                feed,
                temperature,
                pressure,
                inert,
                eos,
                reactions,
                k_sources,
            };
            Ok((cli::equilibrium(&db, &inp)?, json))
        }
        Command::Balance {
            input,
            inlet_dry,
            inlet_flow,
            inlet_water,
            outlet_dry,
            outlet_flow,
            outlet_water,
            sigma_flow_pct,
            sigma_fraction_pct,
            sigma_fraction_floor,
            significance,
            json,
        } => {
            let text = match &input {
                Some(path) => Some((
                    std::fs::read_to_string(path)
                        .map_err(|e| CliError::Input(format!("--input {}: {e}", path.display())))?,
                    path.display().to_string(),
                )),
                None => None,
            };
            let inp = BalanceInput {
                json: text,
                inlet: StreamText {
                    dry: inlet_dry,
                    flow: inlet_flow,
                    water: inlet_water,
                },
                outlet: StreamText {
                    dry: outlet_dry,
                    flow: outlet_flow,
                    water: outlet_water,
                },
                sigma_flow_pct,
                sigma_fraction_pct,
                sigma_fraction_floor,
                significance,
            };
            let v = cli::balance(&db, &inp)?;
            if json {
                Ok((v, true))
            } else {
                Ok((serde_json::Value::String(cli::balance_table(&v)), false))
            }
        }
        Command::Species { json } => Ok((cli::species(&db), json)),
        Command::Check { config } => {
            let settings = load_config(&config)?;
            Ok((
                serde_json::Value::String(eqwatch::config::summary(&settings)),
                false,
            ))
        }
        #[cfg(feature = "daemon")]
        Command::Run {
            config,
            broker,
            log,
        } => {
            run_daemon(&config, broker, &log)?;
            Ok((serde_json::Value::Null, false))
        }
        #[cfg(feature = "daemon")]
        Command::HashPassword { iterations } => {
            Ok((serde_json::Value::String(hash_password(iterations)?), false))
        }
        Command::Replay {
            config,
            input,
            out,
            format,
            plot,
            plot_tz,
            threads,
            log_level,
        } => {
            let format = eqwatch::replay::OutputFormat::parse(&format)
                .map_err(|e| CliError::Input(format!("--format: {e}")))?;
            let plot_tz = eqwatch::plot::TimeZone::parse(&plot_tz)
                .map_err(|e| CliError::Input(format!("--plot-tz: {e}")))?;
            init_tracing(
                &LogArgs {
                    log_format: "text".into(),
                    log_level,
                },
                None,
            )?;
            let text = eqwatch::replay::command(&eqwatch::replay::ReplayArgs {
                config: &config,
                input: &input,
                out: out.as_deref(),
                format,
                plot_dir: plot.as_deref(),
                plot_tz,
                threads,
            })?;
            Ok((serde_json::Value::String(text), false))
        }
        Command::Report {
            config,
            input,
            out,
            from,
            to,
            reactors,
        } => {
            let now_ms = std::time::SystemTime::now()
                .duration_since(std::time::UNIX_EPOCH)
                .map_or(0, |d| d.as_millis() as i64);
            let text = cli::report(
                &cli::ReportArgs {
                    config: &config,
                    input: &input,
                    out: &out,
                    from: from.as_deref(),
                    to: to.as_deref(),
                    reactors: &reactors,
                },
                now_ms,
            )?;
            Ok((serde_json::Value::String(text), false))
        }
        #[cfg(feature = "demo-broker")]
        Command::Demo {
            speed,
            duration,
            broker,
            workdir,
            keep,
            page,
            log,
        } => {
            let work = eqwatch::demo::runner::Workdir::prepare(workdir, keep)?;
            if let Err(e) = init_tracing(&log, Some(&work.log_file())) {
                let _ = work.discard();
                return Err(e);
            }
            let rt = runtime()?;
            rt.block_on(eqwatch::demo::runner::run(
                speed, &duration, broker, page, work,
            ))?;
            Ok((serde_json::Value::Null, false))
        }
    }
}

/// `eqwatch hash-password`: one line of standard input to a stored hash.
#[cfg(feature = "daemon")]
fn hash_password(iterations: u32) -> Result<String, CliError> {
    use eqwatch::config::password::MIN_ITERATIONS;
    if iterations < MIN_ITERATIONS {
        return Err(CliError::Input(format!(
            "--iterations {iterations} is below {MIN_ITERATIONS}"
        )));
    }
    let mut line = String::new();
    std::io::stdin()
        .read_line(&mut line)
        .map_err(|e| CliError::Input(format!("reading the password from standard input: {e}")))?;
    let password = line.trim_end_matches(['\n', '\r']);
    if password.is_empty() {
        return Err(CliError::Input(
            "no password on standard input; e.g. `read -rs PW; printf '%s\\n' \"$PW\" | eqwatch hash-password`".into(),
        ));
    }
    let hash = eqwatch::web::auth::hash_password(password.as_bytes(), iterations)
        .map_err(|e| CliError::Internal(e.to_string()))?;
    Ok(format!("{}\n", hash.format()))
}

fn main() -> ExitCode {
    // A usage mistake is bad input (exit 1, as the README says); --help and --version
    // print and exit 0.
    let args = match Args::try_parse() {
        Ok(a) => a,
        Err(e) => {
            let code = if e.use_stderr() { 1 } else { 0 };
            let _ = e.print();
            return ExitCode::from(code);
        }
    };
    match run(args) {
        Ok((value, json)) => {
            match value {
                serde_json::Value::Null => {}
                serde_json::Value::String(text) => print!("{text}"),
                v if json => println!("{v}"),
                v => print!("{}", cli::table(&v)),
            }
            ExitCode::SUCCESS
        }
        Err(e) => {
            eprintln!("eqwatch: {e}");
            ExitCode::from(e.exit_code() as u8)
        }
    }
}
