//! The `check` summary: one readable page per plant, what was understood from the file.

use std::path::PathBuf;
use std::time::Duration;

use crate::composition::Basis;
use crate::config::duration::show_duration;
use crate::config::settings::{
    BrokerSettings, CompositionSource, MqttProtocol, ReactorSettings, ScalarDecoder, ScalarSource,
    Settings, Wiring,
};
use crate::monitor::alarm::Direction;
use crate::monitor::spec::{InputSpec, ReactorSpec, SteamRatioSpec};
use crate::monitor::watch::{Figure, WatchSettings};
use crate::thermo::species::SpeciesDb;
use crate::units::{PressureUnit, ScalarUnit, TemperatureUnit};

/// The temperature the summary quotes every K at, so reactors compare at a glance.
const SUMMARY_T_K: f64 = 700.0;

fn temperature_unit_label(u: TemperatureUnit) -> &'static str {
    match u {
        TemperatureUnit::Kelvin => "K",
        TemperatureUnit::Celsius => "degC",
        TemperatureUnit::Fahrenheit => "degF",
        TemperatureUnit::Rankine => "degR",
    }
}

fn pressure_unit_label(u: PressureUnit) -> String {
    const NAMES: [&str; 15] = [
        "bara", "barg", "mbar", "mbarg", "Pa", "Pag", "kPa", "kPag", "MPa", "MPag", "psia", "psig",
        "atm", "kg/cm2a", "kg/cm2g",
    ];
    NAMES
        .iter()
        .find(|n| PressureUnit::parse(n).is_ok_and(|x| x == u))
        .map_or_else(
            || {
                format!(
                    "{} bar per unit{}",
                    u.bar_per_unit,
                    if u.gauge { ", gauge" } else { "" }
                )
            },
            |n| (*n).to_string(),
        )
}

fn show_bytes(n: u64) -> String {
    const MIB: u64 = 1024 * 1024;
    if n >= MIB && n.is_multiple_of(MIB) {
        format!("{} MiB", n / MIB)
    } else if n >= 1024 && n.is_multiple_of(1024) {
        format!("{} KiB", n / 1024)
    } else {
        format!("{n} bytes")
    }
}

fn show_decoder(d: &ScalarDecoder) -> String {
    match d {
        ScalarDecoder::Number => "bare number".to_string(),
        ScalarDecoder::Json { value_pointer, .. } => format!("json {value_pointer}"),
    }
}

fn show_scalar(s: &InputSpec, source: &ScalarSource) -> String {
    let unit = match s.unit {
        ScalarUnit::Temperature(t) => temperature_unit_label(t).to_string(),
        ScalarUnit::Pressure(p) => pressure_unit_label(p),
        ScalarUnit::Ratio => "mol H2O/mol dry gas".to_string(),
        ScalarUnit::Flow(f) => f.label.to_string(),
    };
    let internal = match s.unit {
        ScalarUnit::Temperature(_) => "K",
        ScalarUnit::Pressure(_) => "bar abs",
        ScalarUnit::Ratio => "mol/mol",
        ScalarUnit::Flow(_) => "kmol/h",
    };
    format!(
        "{} on {} ({unit}, {}), stale after {}, plausible {} to {} {internal}",
        s.tag,
        source.topic,
        show_decoder(&source.decoder),
        show_duration(s.max_age),
        show_number(s.plausible.min),
        show_number(s.plausible.max)
    )
}

/// A number without trailing zeros (up to six decimals): `2`, `0.004`, `1.01325`.
pub(crate) fn show_number(x: f64) -> String {
    let text = format!("{x:.6}");
    let text = text.trim_end_matches('0').trim_end_matches('.');
    if text == "-0" {
        "0".to_string()
    } else {
        text.to_string()
    }
}

/// K to four significant figures, in plain notation where that reads well.
fn show_k(k: f64) -> String {
    if (1e-3..1e4).contains(&k) {
        let decimals = (3.0 - k.log10().floor()).max(0.0) as usize;
        format!("{k:.decimals$}")
    } else {
        format!("{k:.3e}")
    }
}

/// The plant as `eqwatch check` prints it for a valid configuration: site, broker,
/// output prefix, journal, http, then per reactor its reactions with ln K and K at
/// 700 K (one temperature for all, so reactors compare at a glance), equation of
/// state, basis, inputs and key component.
pub fn summary(settings: &Settings) -> String {
    let mut rows = Rows(Vec::new());
    rows.row("site", settings.site.clone());
    broker_rows(&mut rows, &settings.broker);
    plant_rows(&mut rows, settings);
    for reactor in &settings.reactors {
        reactor_rows(&mut rows, &settings.species, reactor);
    }
    for t in &settings.trains {
        let ids: Vec<&str> = t
            .members
            .iter()
            .filter_map(|&r| settings.reactors.get(r).map(|x| x.spec.id.as_str()))
            .collect();
        rows.row(
            "train",
            format!(
                "{}: {} ({}) on {}/train/{}",
                t.id,
                t.name,
                ids.join(" -> "),
                settings.topic_prefix,
                t.id
            ),
        );
    }
    if !settings.commands.allowed_users.is_empty() || !settings.commands.allowed_clients.is_empty()
    {
        rows.row(
            "commands",
            format!(
                "from users [{}], client ids [{}]",
                settings.commands.allowed_users.join(", "),
                settings.commands.allowed_clients.join(", ")
            ),
        );
    }
    let mut text = rows.0.join("\n");
    text.push('\n');
    text
}

/// The summary's lines: a label column 14 characters wide, then the text.
struct Rows(Vec<String>);

impl Rows {
    fn row(&mut self, label: &str, text: String) {
        self.0.push(format!("{label:<14}{text}"));
    }
}

/// The broker: URL, protocol and client id, session and login, limits, TLS files.
fn broker_rows(rows: &mut Rows, broker: &BrokerSettings) {
    let protocol = match broker.protocol {
        MqttProtocol::V311 => "MQTT 3.1.1",
        MqttProtocol::V5 => "MQTT 5",
    };
    let scheme = if broker.tls { "mqtts" } else { "mqtt" };
    let host = if broker.host.contains(':') {
        format!("[{}]", broker.host)
    } else {
        broker.host.clone()
    };
    rows.row(
        "broker",
        format!(
            "{scheme}://{host}:{}, {protocol}, client id {}",
            broker.port, broker.client_id
        ),
    );
    let session = if broker.session_expiry.is_zero() {
        "clean session".to_string()
    } else {
        format!("session kept {}", show_duration(broker.session_expiry))
    };
    let login = match (&broker.username, &broker.password) {
        (Some(u), Some(_)) => format!("user {u} with a password"),
        (Some(u), None) => format!("user {u}, no password"),
        (None, Some(_)) => "a password, no user name".to_string(),
        (None, None) => "anonymous".to_string(),
    };
    rows.row(
        "",
        format!(
            "keep-alive {}, connect within {}, {session}, {login}",
            show_duration(broker.keep_alive),
            show_duration(broker.connect_timeout)
        ),
    );
    rows.row(
        "",
        format!(
            "packets up to {}, {} in flight, reconnect after {} to {}",
            show_bytes(broker.max_packet_bytes as u64),
            broker.inflight,
            show_duration(broker.reconnect_min),
            show_duration(broker.reconnect_max)
        ),
    );
    if broker.tls {
        let file = |f: &Option<PathBuf>| {
            f.as_ref()
                .map_or("none".to_string(), |p| p.display().to_string())
        };
        rows.row(
            "",
            format!(
                "tls: ca {}, client certificate {}",
                file(&broker.ca_file),
                file(&broker.client_cert_file)
            ),
        );
    }
}

/// Where results and the journal go, the HTTP listener, the atmosphere, the species.
fn plant_rows(rows: &mut Rows, settings: &Settings) {
    rows.row(
        "results",
        format!("{}/<reactor>/...", settings.topic_prefix),
    );
    if let Some(shard) = &settings.shard {
        rows.row(
            "shard",
            format!(
                "{shard}: status on {}, plant-wide alarms on {}",
                settings.daemon_topic("status"),
                settings.daemon_topic("alarms")
            ),
        );
    }
    let journal = &settings.journal;
    rows.row(
        "journal",
        format!(
            "{} (files up to {}, {} in all, fsync every {})",
            journal.dir.display(),
            show_bytes(journal.max_file_bytes),
            show_bytes(journal.max_total_bytes),
            show_duration(journal.fsync_interval)
        ),
    );
    rows.row(
        "http",
        settings
            .http_listen
            .map_or("off".to_string(), |a| a.to_string()),
    );
    rows.row(
        "atmosphere",
        format!(
            "{} bar absolute (added to gauge readings)",
            show_number(settings.atmosphere_bar)
        ),
    );
    rows.row(
        "species",
        format!("{} in the library", settings.species.len()),
    );
}

/// One reactor: its reactions with K at the summary temperature, the equation of state,
/// the analysis, the inputs and the watch settings.
fn reactor_rows(rows: &mut Rows, species: &SpeciesDb, reactor: &ReactorSettings) {
    let (spec, wiring) = (&reactor.spec, &reactor.wiring);
    rows.row("", String::new());
    rows.row("reactor", format!("{}: {}", spec.id, spec.name));
    for (reaction, k) in &spec.reactions {
        let (lo, hi) = k.valid_range_k();
        let ln_k = k.ln_k(SUMMARY_T_K);
        let outside = if k.in_range(SUMMARY_T_K) {
            ""
        } else {
            " (outside the source's range)"
        };
        rows.row("  reaction", reaction.canonical());
        rows.row(
            "",
            format!(
                "K from {} (valid {lo:.0} to {hi:.0} K); at {SUMMARY_T_K:.0} K ln K = {ln_k:.3}, K = {}{outside}",
                k.id().as_str(),
                show_k(ln_k.exp())
            ),
        );
    }
    rows.row(
        "  eos",
        format!(
            "{}; at equilibrium within |ln(Q/K)| <= {}",
            spec.eos.as_str(),
            show_number(spec.model.band_ln)
        ),
    );
    analysis_rows(rows, spec, wiring);
    input_rows(rows, species, spec, wiring);
    for (label, line) in summary_lines(&spec.watch) {
        rows.row(label, line);
    }
}

/// The analysis: tag and topics, basis, unit, sum tolerance, lag, age, the gas.
fn analysis_rows(rows: &mut Rows, spec: &ReactorSpec, wiring: &Wiring) {
    let analysis = &spec.composition;
    match &wiring.composition {
        CompositionSource::Analyser { topic, .. } => rows.row(
            "  analysis",
            format!(
                "{} on {topic}: {}",
                analysis.tag,
                analysis.components.join(", ")
            ),
        ),
        CompositionSource::PerComponent { topics, decoder } => {
            rows.row(
                "  analysis",
                format!(
                    "{}, one topic per component ({}):",
                    analysis.tag,
                    show_decoder(decoder)
                ),
            );
            for (name, topic) in topics {
                rows.row("", format!("  {name} on {topic}"));
            }
        }
    }
    rows.row(
        "",
        format!(
            "{} basis, {}, sums to 100 ± {} mol%, lag {}, stale after {}",
            analysis.basis.as_str(),
            analysis.unit.label(),
            show_number(analysis.sum_tolerance * 100.0),
            show_duration(analysis.lag),
            show_duration(analysis.max_age)
        ),
    );
    let water = if analysis.basis == Basis::Dry {
        " (H2O from the steam ratio)"
    } else {
        ""
    };
    rows.row("  gas", format!("{}{water}", spec.model.names().join(", ")));
}

/// Temperatures, pressure, steam ratio, key component, uncertainty, transient limit.
fn input_rows(rows: &mut Rows, species: &SpeciesDb, spec: &ReactorSpec, wiring: &Wiring) {
    for (t, source) in spec.temperatures.iter().zip(&wiring.temperatures) {
        rows.row("  temperature", show_scalar(t, source));
    }
    if let Some(b) = &spec.bed_profile {
        let g = &b.geometry;
        rows.row(
            "  bed profile",
            format!(
                "{} m of catalyst, front at {} % of the rise ({}, none below {} K), end of life at {} m, WABT {}",
                show_number(g.depth_m),
                show_number(100.0 * g.front_fraction),
                g.interpolation.label(),
                show_number(g.min_rise_k),
                show_number(g.end_of_life_depth_m),
                g.wabt.label()
            ),
        );
        for ((t, depth), source) in b.thermocouples.iter().zip(&wiring.bed) {
            rows.row(
                "  bed point",
                format!("{} m: {}", show_number(*depth), show_scalar(t, source)),
            );
        }
    }
    if let Some(rc) = &spec.reconcile {
        rows.row(
            "  inlet",
            format!(
                "{}: {} ({} basis), lag {}, stale after {}",
                rc.inlet.tag,
                rc.inlet.components.join(", "),
                rc.inlet.basis.as_str(),
                show_duration(rc.inlet.lag),
                show_duration(rc.inlet.max_age)
            ),
        );
        rows.row(
            "  reconcile",
            format!(
                "element balances, weighted least squares; analysers ± {} % (at least {} mol%), global and measurement tests at {} %",
                show_number(100.0 * rc.analyser_sigma_rel),
                show_number(100.0 * rc.analyser_sigma_floor),
                show_number(100.0 * rc.options.alpha)
            ),
        );
    }
    for (f, source) in spec.flows.iter().zip(&wiring.flows) {
        rows.row(
            "  flow",
            format!(
                "{} ({}, σ {} %): {}",
                f.stream.as_str(),
                if f.stream == crate::monitor::spec::FlowStream::InletSteam {
                    "steam"
                } else {
                    "dry gas"
                },
                show_number(100.0 * f.sigma_rel),
                show_scalar(&f.input, source)
            ),
        );
    }
    rows.row("  pressure", show_scalar(&spec.pressure, &wiring.pressure));
    match (&spec.steam_ratio, &wiring.steam_ratio) {
        (Some(SteamRatioSpec::Fixed(v)), _) => rows.row(
            "  steam ratio",
            format!("fixed at {} mol H2O per mol dry gas", show_number(*v)),
        ),
        (Some(SteamRatioSpec::Measured(m)), Some(source)) => {
            rows.row("  steam ratio", show_scalar(m, source));
        }
        _ => {}
    }
    rows.row("  key", species.get(spec.key_component).name.clone());
    let uncertainty = &spec.uncertainty;
    let steam = if spec.steam_ratio.is_some() {
        format!(
            ", steam ratio {} %",
            show_number(uncertainty.steam_ratio_rel * 100.0)
        )
    } else {
        String::new()
    };
    rows.row(
        "  ±",
        format!(
            "{} K, {} bar, {} % of reading{steam}",
            show_number(uncertainty.temperature_k),
            show_number(uncertainty.pressure_bar),
            show_number(uncertainty.composition_rel * 100.0)
        ),
    );
    rows.row(
        "  transient",
        format!("above {} K/min", show_number(spec.transient_k_per_min)),
    );
}

fn days(ms: i64) -> String {
    show_duration(Duration::from_millis(u64::try_from(ms).unwrap_or(0)))
}

/// Lines for `eqwatch check`: drift, alerts, alarms, off-line limit.
fn summary_lines(watch: &WatchSettings) -> Vec<(&'static str, String)> {
    use crate::monitor::watch::BaselineSpec as B;
    let drift = &watch.drift;
    let mut out = Vec::new();
    let baseline = match drift.baseline {
        B::Learn {
            window_ms,
            min_samples,
        } => format!(
            "baseline learned over {} (at least {min_samples} samples, σ ≥ {} K)",
            days(window_ms),
            drift.sigma_floor_k
        ),
        B::Given {
            approach_k,
            sigma_k,
        } => format!("baseline given: {approach_k} K, σ {sigma_k} K"),
    };
    out.push(("  drift", baseline));
    out.push((
        "",
        format!(
            "{} trend on {} aggregates ({}+ samples), {}{} aggregates before a trend; end of run {}",
            drift.trend.as_str(),
            days(drift.aggregate_ms),
            drift.min_per_aggregate,
            drift.trend_window_ms
                .map_or(String::new(), |t| format!("last {}, ", days(t))),
            drift.min_aggregates,
            drift.end_of_run_limit_k
                .map_or("not set".to_string(), |l| format!("at {l} K")),
        ),
    ));
    if let Some(n) = &drift.normalise {
        let names: Vec<&str> = n.inputs.iter().map(|c| c.name()).collect();
        out.push((
            "",
            format!(
                "on the approach normalised for {} (least squares over the baseline window, {}+ samples; none beyond {} % of the learned range)",
                names.join(", "),
                n.config.min_samples,
                show_number(100.0 * n.config.margin)
            ),
        ));
    }
    let a = &watch.alerts;
    let mut alerts = Vec::new();
    if let Some(r) = a.trend_above_k_per_day {
        alerts.push(format!("trend > {r} K/d"));
    }
    if let Some(n) = a.end_of_run_within_days {
        alerts.push(format!("end of run < {n} d"));
    }
    if a.cusum {
        alerts.push("CUSUM".into());
    }
    if let Some(t) = a.data_quality_after_ms {
        alerts.push(format!("no good result for {}", days(t)));
    }
    if a.self_monitoring && !watch.alarms.is_empty() {
        alerts.push("chattering and stale alarms".into());
    }
    if let Some(n) = a.gross_error_samples {
        alerts.push(format!("gross error ({n} failed balances in a row)"));
    }
    out.push((
        "  alerts",
        if alerts.is_empty() {
            "none".into()
        } else {
            alerts.join(", ")
        },
    ));
    for (i, x) in watch.alarms.iter().enumerate() {
        let c = &x.config;
        let delay = if c.on_delay_samples > 1 {
            format!(", on-delay {} samples", c.on_delay_samples)
        } else if c.on_delay_ms > 0 {
            format!(", on-delay {}", days(c.on_delay_ms))
        } else {
            String::new()
        };
        out.push((
            if i == 0 { "  alarms" } else { "" },
            format!(
                "{} {} {} {} {} (deadband {} {}{delay}, priority {})",
                c.id,
                match x.figure {
                    Figure::Approach => "approach",
                    Figure::KeyMeasured => "key component",
                },
                match c.direction {
                    Direction::High => "above",
                    Direction::Low => "below",
                },
                c.limit,
                x.unit,
                c.deadband,
                x.unit,
                c.priority.number()
            ),
        ));
    }
    if let Some(b) = watch.offline_below_bar {
        out.push(("  off line", format!("below {b:.3} bar abs")));
    }
    out
}
