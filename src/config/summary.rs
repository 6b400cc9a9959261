//! The `check` summary: one readable page per plant, what was understood from the file.

use std::path::PathBuf;

use crate::composition::Basis;
use crate::config::duration::show_duration;
use crate::config::settings::{
    CompositionSource, MqttProtocol, ScalarDecoder, ScalarSource, Settings,
};
use crate::monitor::spec::{InputSpec, SteamRatioSpec};
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
    if n >= MIB && n % MIB == 0 {
        format!("{} MiB", n / MIB)
    } else if n >= 1024 && n % 1024 == 0 {
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
    };
    format!(
        "{} on {} ({unit}, {}), stale after {}",
        s.tag,
        source.topic,
        show_decoder(&source.decoder),
        show_duration(s.max_age)
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
    let s = settings;
    let b = &s.broker;
    let mut out: Vec<String> = Vec::new();
    let mut row = |label: &str, text: String| out.push(format!("{label:<14}{text}"));
    row("site", s.site.clone());
    let protocol = match b.protocol {
        MqttProtocol::V311 => "MQTT 3.1.1",
        MqttProtocol::V5 => "MQTT 5",
    };
    let scheme = if b.tls { "mqtts" } else { "mqtt" };
    let host = if b.host.contains(':') {
        format!("[{}]", b.host)
    } else {
        b.host.clone()
    };
    row(
        "broker",
        format!(
            "{scheme}://{host}:{}, {protocol}, client id {}",
            b.port, b.client_id
        ),
    );
    let session = if b.session_expiry.is_zero() {
        "clean session".to_string()
    } else {
        format!("session kept {}", show_duration(b.session_expiry))
    };
    let login = match (&b.username, &b.password) {
        (Some(u), Some(_)) => format!("user {u} with a password"),
        (Some(u), None) => format!("user {u}, no password"),
        (None, Some(_)) => "a password, no user name".to_string(),
        (None, None) => "anonymous".to_string(),
    };
    row(
        "",
        format!(
            "keep-alive {}, {session}, {login}",
            show_duration(b.keep_alive)
        ),
    );
    row(
        "",
        format!(
            "packets up to {}, {} in flight, reconnect after {} to {}",
            show_bytes(b.max_packet_bytes as u64),
            b.inflight,
            show_duration(b.reconnect_min),
            show_duration(b.reconnect_max)
        ),
    );
    if b.tls {
        let file = |f: &Option<PathBuf>| {
            f.as_ref()
                .map_or("none".to_string(), |p| p.display().to_string())
        };
        row(
            "",
            format!(
                "tls: ca {}, client certificate {}",
                file(&b.ca_file),
                file(&b.client_cert_file)
            ),
        );
    }
    row("results", format!("{}/<reactor>/...", s.topic_prefix));
    let j = &s.journal;
    row(
        "journal",
        format!(
            "{} (files up to {}, {} in all, fsync every {})",
            j.dir.display(),
            show_bytes(j.max_file_bytes),
            show_bytes(j.max_total_bytes),
            show_duration(j.fsync_interval)
        ),
    );
    row(
        "http",
        s.http_listen.map_or("off".to_string(), |a| a.to_string()),
    );
    row(
        "atmosphere",
        format!(
            "{} bar absolute (added to gauge readings)",
            show_number(s.atmosphere_bar)
        ),
    );
    row("species", format!("{} in the library", s.species.len()));
    for settings in &s.reactors {
        let (r, w) = (&settings.spec, &settings.wiring);
        row("", String::new());
        row("reactor", format!("{}: {}", r.id, r.name));
        for (reaction, k) in &r.reactions {
            let (lo, hi) = k.valid_range_k();
            let ln_k = k.ln_k(SUMMARY_T_K);
            let outside = if k.in_range(SUMMARY_T_K) {
                ""
            } else {
                " (outside the source's range)"
            };
            row("  reaction", reaction.canonical());
            row(
                "",
                format!(
                    "K from {} (valid {lo:.0} to {hi:.0} K); at {SUMMARY_T_K:.0} K ln K = {ln_k:.3}, K = {}{outside}",
                    k.id().as_str(),
                    show_k(ln_k.exp())
                ),
            );
        }
        row(
            "  eos",
            format!(
                "{}; at equilibrium within |ln(Q/K)| <= {}",
                r.eos.as_str(),
                show_number(r.model.band_ln)
            ),
        );
        let c = &r.composition;
        match &w.composition {
            CompositionSource::Analyser { topic, .. } => row(
                "  analysis",
                format!("{} on {topic}: {}", c.tag, c.components.join(", ")),
            ),
            CompositionSource::PerComponent { topics, decoder } => {
                row(
                    "  analysis",
                    format!(
                        "{}, one topic per component ({}):",
                        c.tag,
                        show_decoder(decoder)
                    ),
                );
                for (name, topic) in topics {
                    row("", format!("  {name} on {topic}"));
                }
            }
        }
        row(
            "",
            format!(
                "{} basis, {}, sums to 100 ± {} mol%, lag {}, stale after {}",
                c.basis.as_str(),
                c.unit.label(),
                show_number(c.sum_tolerance * 100.0),
                show_duration(c.lag),
                show_duration(c.max_age)
            ),
        );
        let water = if c.basis == Basis::Dry {
            " (H2O from the steam ratio)"
        } else {
            ""
        };
        row("  gas", format!("{}{water}", r.model.names().join(", ")));
        for (t, source) in r.temperatures.iter().zip(&w.temperatures) {
            row("  temperature", show_scalar(t, source));
        }
        row("  pressure", show_scalar(&r.pressure, &w.pressure));
        match (&r.steam_ratio, &w.steam_ratio) {
            (Some(SteamRatioSpec::Fixed(v)), _) => row(
                "  steam ratio",
                format!("fixed at {} mol H2O per mol dry gas", show_number(*v)),
            ),
            (Some(SteamRatioSpec::Measured(m)), Some(source)) => {
                row("  steam ratio", show_scalar(m, source));
            }
            _ => {}
        }
        row("  key", s.species.get(r.key_component).name.clone());
        let u = &r.uncertainty;
        let steam = if r.steam_ratio.is_some() {
            format!(", steam ratio {} %", show_number(u.steam_ratio_rel * 100.0))
        } else {
            String::new()
        };
        row(
            "  ±",
            format!(
                "{} K, {} bar, {} % of reading{steam}",
                show_number(u.temperature_k),
                show_number(u.pressure_bar),
                show_number(u.composition_rel * 100.0)
            ),
        );
        row(
            "  transient",
            format!("above {} K/min", show_number(r.transient_k_per_min)),
        );
        for (label, line) in crate::config::watch::summary_lines(&r.watch) {
            row(label, line);
        }
    }
    if !s.commands.allowed_users.is_empty() || !s.commands.allowed_clients.is_empty() {
        row(
            "commands",
            format!(
                "from users [{}], client ids [{}]",
                s.commands.allowed_users.join(", "),
                s.commands.allowed_clients.join(", ")
            ),
        );
    }
    let mut text = out.join("\n");
    text.push('\n');
    text
}
