//! Validation of the raw configuration into [`Settings`](crate::config::Settings), every problem
//! with its key path; one file per section (broker and journal, reactors, their inputs).

pub(crate) mod bed;
pub(crate) mod broker;
pub(crate) mod context;
pub(crate) mod inputs;
pub(crate) mod reactor;
pub(crate) mod watch;

use std::net::SocketAddr;
use std::path::Path;
use std::time::Duration;

use toml::Spanned;

use crate::config::EnvLookup;
use crate::config::duration::{parse_duration, show_duration};
use crate::config::error::{ConfigErrors, Problems, is_name_char, unit_message};
use crate::config::files::species_db;
use crate::config::raw::{RawConfig, RawReactor, RawSparkplug, RawTimestamps};
use crate::config::settings::{Settings, SparkplugSettings};
use crate::config::validate::broker::{broker, journal};
use crate::config::validate::reactor::{ReactorEnv, reactor};
use crate::monitor::spec::ClockWindow;
use crate::units::{PressureUnit, STANDARD_ATMOSPHERE_BAR, split_quantity};

pub(crate) fn validate(
    raw: &RawConfig,
    base: &Path,
    env: EnvLookup,
) -> Result<Settings, ConfigErrors> {
    let mut problems = Problems::default();
    if raw.site.is_empty() {
        problems.add("site", "is empty; give a short site name, e.g. \"baw1\"");
    } else if !raw.site.chars().all(is_name_char) {
        problems.add(
            "site",
            format!(
                "\"{}\" may use only letters, digits, `-` and `_` (it goes into topics)",
                raw.site
            ),
        );
    }
    let shard = raw.shard.clone();
    if let Some(s) = &shard
        && (s.is_empty() || s.len() > 32 || !s.chars().all(is_name_char))
    {
        problems.add(
                "shard",
                format!(
                    "\"{s}\" must be 1 to 32 letters, digits, `-` or `_` (it goes into topics and the client id)"
                ),
            );
    }
    let topic_prefix = match &raw.topic_prefix {
        None => format!("eqwatch/{}", raw.site),
        Some(t) => {
            if t.is_empty() {
                problems.add("topic_prefix", "is empty; e.g. \"eqwatch/baw1\"");
            } else if t.contains(['+', '#']) {
                problems.add(
                    "topic_prefix",
                    format!("\"{t}\" contains a wildcard (`+` or `#`); give a plain topic"),
                );
            } else if t.ends_with('/') {
                problems.add(
                    "topic_prefix",
                    format!("\"{t}\" ends with `/`; leave it off"),
                );
            } else if t.contains('\0') {
                problems.add("topic_prefix", "contains a NUL character");
            }
            t.clone()
        }
    };
    let atmosphere_bar = match &raw.atmosphere {
        None => STANDARD_ATMOSPHERE_BAR,
        Some(text) => atmosphere(&mut problems, text),
    };
    let species = species_db(&mut problems, &raw.species_files, base);
    let id_base = match &shard {
        Some(s) => format!("{}-{s}", raw.site),
        None => raw.site.clone(),
    };
    let broker = broker(&mut problems, &raw.broker, &id_base, base, env);
    let journal = journal(&mut problems, &raw.journal, base);
    let listen = raw.http.as_ref().and_then(|h| h.listen.as_deref());
    let http_listen = match listen {
        None => Some(SocketAddr::from(([127, 0, 0, 1], 9873))),
        Some(l) if l.trim().eq_ignore_ascii_case("off") => None,
        Some(l) => match l.trim().parse::<SocketAddr>() {
            Ok(a) => Some(a),
            Err(_) => {
                problems.add(
                    "http.listen",
                    format!(
                        "\"{l}\" is not an address and port; expected e.g. \"127.0.0.1:9873\", \"[::1]:9873\" or \"off\""
                    ),
                );
                None
            }
        },
    };
    let mut ids: Vec<(&Spanned<String>, &RawReactor)> = raw.reactors.iter().collect();
    ids.sort_by_key(|(k, _)| k.span().start);
    if ids.is_empty() {
        problems.add(
            "reactors",
            "no reactors; add at least one [reactors.<id>] table",
        );
    }
    let env = ReactorEnv {
        db: &species,
        output_prefix: &topic_prefix,
        atmosphere_bar,
        clock: timestamps(&mut problems, raw.timestamps.as_ref()),
    };
    let mut reactors = Vec::with_capacity(ids.len());
    for (id, r) in ids {
        if let Some(settings) = reactor(&mut problems, &env, id.get_ref(), r) {
            reactors.push(settings);
        }
    }
    let commands = crate::config::validate::watch::commands(&mut problems, raw.commands.as_ref());
    let http_users = crate::config::password::users(&mut problems, raw.http.as_ref(), &commands);
    let uses_spb = raw_topics(raw).any(|t| t.starts_with(crate::config::SpbRef::PREFIX));
    let sparkplug = sparkplug(
        &mut problems,
        raw.sparkplug.as_ref(),
        &raw.site,
        shard.as_deref(),
        uses_spb,
    );
    let trains = trains(&mut problems, &raw.trains, &reactors);
    if !problems.is_empty() {
        return Err(problems.into_errors());
    }
    Ok(Settings {
        trains,
        commands,
        site: raw.site.clone(),
        shard,
        topic_prefix,
        metrics_topic: raw.metrics_topic.unwrap_or(false),
        broker,
        journal,
        http_listen,
        http_users,
        atmosphere_bar,
        species,
        reactors,
        sparkplug,
    })
}

/// `[trains.<id>]`: at least two configured reactors each, none twice.
fn trains(
    problems: &mut Problems,
    raw: &std::collections::BTreeMap<String, crate::config::raw::RawTrain>,
    reactors: &[crate::config::ReactorSettings],
) -> Vec<crate::config::settings::TrainSettings> {
    let mut out = Vec::new();
    for (id, t) in raw {
        let path = crate::config::error::key_path("trains", id);
        let bare = !id.is_empty()
            && id
                .chars()
                .all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_');
        if !bare {
            problems.add(
                path.clone(),
                "a train id is letters, digits, `-` and `_` only",
            );
            continue;
        }
        let mut members = Vec::new();
        for (i, r) in t.reactors.iter().enumerate() {
            match reactors.iter().position(|x| x.spec.id == r.trim()) {
                Some(k) if members.contains(&k) => problems.add(
                    format!("{path}.reactors[{i}]"),
                    format!("\"{r}\" is listed twice"),
                ),
                Some(k) => members.push(k),
                None => {
                    let known: Vec<&str> = reactors.iter().map(|x| x.spec.id.as_str()).collect();
                    problems.add(
                        format!("{path}.reactors[{i}]"),
                        format!("\"{r}\" is not a configured reactor ({})", known.join(", ")),
                    );
                }
            }
        }
        if t.reactors.len() < 2 {
            problems.add(
                format!("{path}.reactors"),
                "a train needs at least two reactors, in process order",
            );
        }
        out.push(crate::config::settings::TrainSettings {
            id: id.clone(),
            name: t.name.clone().unwrap_or_else(|| id.clone()),
            members,
        });
    }
    out
}

/// Every input topic as written (for the `[sparkplug]` requirement).
fn raw_topics(raw: &RawConfig) -> impl Iterator<Item = &str> {
    raw.reactors.values().flat_map(|r| {
        let c = &r.composition;
        c.topic
            .iter()
            .map(String::as_str)
            .chain(c.topics.iter().flatten().map(|(_, t)| t.as_str()))
            .chain(r.temperature.iter().filter_map(|t| t.topic.as_deref()))
            .chain(r.pressure.topic.as_deref())
            .chain(r.steam_ratio.as_ref().and_then(|s| s.topic.as_deref()))
    })
}

/// A Sparkplug id (group, edge node, host): not empty, none of `/`, `+`, `#`
/// (Sparkplug 3.0, topic namespace elements).
fn sparkplug_id(problems: &mut Problems, path: &str, id: &str) {
    if id.is_empty() || id.contains(['/', '+', '#']) || id.trim() != id {
        problems.add(
            path,
            format!(
                "\"{id}\" is not a Sparkplug id: not empty, no `/`, `+`, `#` or surrounding spaces"
            ),
        );
    }
}

/// `[sparkplug]`: required when an input is a `spb:` reference.
fn sparkplug(
    problems: &mut Problems,
    raw: Option<&RawSparkplug>,
    site: &str,
    shard: Option<&str>,
    uses_spb: bool,
) -> Option<SparkplugSettings> {
    let Some(raw) = raw else {
        if uses_spb {
            problems.add(
                "sparkplug",
                "inputs on Sparkplug metrics (spb:...) need a [sparkplug] table (eqwatch's Sparkplug connection)",
            );
        }
        return None;
    };
    let group_id = raw.group_id.clone().unwrap_or_else(|| site.to_string());
    sparkplug_id(problems, "sparkplug.group_id", &group_id);
    let edge_node_id = raw.edge_node_id.clone().unwrap_or_else(|| match shard {
        Some(s) => format!("eqwatch-{s}"),
        None => "eqwatch".to_string(),
    });
    sparkplug_id(problems, "sparkplug.edge_node_id", &edge_node_id);
    if let Some(h) = &raw.host_id {
        sparkplug_id(problems, "sparkplug.host_id", h);
    }
    if let Some(c) = &raw.client_id
        && (c.is_empty()
            || c.len() > 23
            || !c
                .chars()
                .all(|ch| ch.is_ascii_alphanumeric() || ch == '-' || ch == '_'))
    {
        problems.add(
            "sparkplug.client_id",
            format!("\"{c}\": 1 to 23 letters, digits, `-` or `_` (what every MQTT 3.1.1 broker accepts)"),
        );
    }
    let reorder_timeout = duration_at(
        problems,
        "sparkplug.reorder_timeout",
        raw.reorder_timeout.as_deref(),
        DurationRule {
            default: Some(Duration::from_secs(2)),
            min: Duration::from_millis(100),
            why_min: "a broker reorders within milliseconds, not less",
        },
    );
    if reorder_timeout > Duration::from_secs(60) {
        problems.add(
            "sparkplug.reorder_timeout",
            "more than 60 s: inputs would wait that long behind a lost message; 1 to 10 s is usual",
        );
    }
    Some(SparkplugSettings {
        client_id: raw.client_id.clone(),
        group_id,
        edge_node_id,
        publish: raw.publish.unwrap_or(true),
        host_id: raw.host_id.clone(),
        reorder_timeout,
    })
}

/// `[timestamps]`: the window around the daemon's clock a reading's timestamp must fall
/// in; the defaults are [`ClockWindow::default`] (5 min ahead, 7 d behind).
fn timestamps(problems: &mut Problems, raw: Option<&RawTimestamps>) -> ClockWindow {
    let default = ClockWindow::default();
    let Some(raw) = raw else {
        return default;
    };
    let max_ahead = duration_at(
        problems,
        "timestamps.max_ahead",
        raw.max_ahead.as_deref(),
        DurationRule {
            default: Some(default.max_ahead),
            min: Duration::from_secs(1),
            why_min: "clocks are never closer than that",
        },
    );
    let max_behind = duration_at(
        problems,
        "timestamps.max_behind",
        raw.max_behind.as_deref(),
        DurationRule {
            default: Some(default.max_behind),
            min: Duration::from_secs(60),
            why_min: "a broker delivering what it held after a short outage is that late",
        },
    );
    ClockWindow {
        max_ahead,
        max_behind,
    }
}

pub(crate) fn atmosphere(problems: &mut Problems, text: &str) -> f64 {
    let parsed = split_quantity("atmosphere", text)
        .map_err(|e| e.to_string())
        .and_then(|(v, unit)| {
            if unit.is_empty() {
                return Err(format!(
                    "\"{text}\" has no unit; write it as e.g. \"1.013 bar\""
                ));
            }
            let u = PressureUnit::parse(unit).map_err(|e| unit_message(&e))?;
            if u.gauge {
                return Err(format!(
                    "\"{text}\" is a gauge pressure; the site's barometric pressure is absolute, e.g. \"0.98 bar\""
                ));
            }
            Ok(v * u.bar_per_unit)
        });
    match parsed {
        // A barometer anywhere people build plants: 0.5 bar is above 5000 m altitude.
        Ok(bar) if (0.5..=1.1).contains(&bar) => bar,
        Ok(bar) => {
            problems.add(
                "atmosphere",
                format!("{bar} bar is not a barometric pressure; expected 0.5 to 1.1 bar absolute"),
            );
            STANDARD_ATMOSPHERE_BAR
        }
        Err(m) => {
            problems.add("atmosphere", m);
            STANDARD_ATMOSPHERE_BAR
        }
    }
}

/// What a duration option allows: its default (`None`: the option is required), the least
/// value (zero allowed when it is zero) and why that is the least.
#[derive(Clone, Copy)]
pub(crate) struct DurationRule {
    pub(crate) default: Option<Duration>,
    pub(crate) min: Duration,
    pub(crate) why_min: &'static str,
}

/// Parses a duration at `path` under `rule`; an absent option takes the rule's default.
pub(crate) fn duration_at(
    problems: &mut Problems,
    path: &str,
    text: Option<&str>,
    rule: DurationRule,
) -> Duration {
    let DurationRule {
        default,
        min,
        why_min,
    } = rule;
    let d = match (text, default) {
        (Some(t), _) => match parse_duration(t) {
            Ok(d) => d,
            Err(e) => {
                problems.add(path, e.to_string());
                return default.unwrap_or(min);
            }
        },
        (None, Some(d)) => return d,
        (None, None) => {
            problems.add(path, "missing; give a duration such as \"2 min\"");
            return min;
        }
    };
    if d < min {
        if d.is_zero() {
            problems.add(path, format!("must be above zero ({why_min})"));
        } else {
            problems.add(
                path,
                format!(
                    "{} is too short; at least {} ({why_min})",
                    show_duration(d),
                    show_duration(min)
                ),
            );
        }
    }
    d
}

pub(crate) const NANOSECOND: Duration = Duration::from_nanos(1);

#[cfg(test)]
mod tests {
    //! Check values: see `test_support` (the demo plant's own data, else invented).

    use crate::config::test_support::{assert_problems, broken, check, refused, with_broker};

    #[test]
    fn sparkplug_inputs_are_references_and_need_their_table() {
        // Sparkplug B 3.0: group, edge node and device ids never contain `/`, `+`, `#`.
        let demo = include_str!("../../../config/demo-plant.toml");
        let on_spb = demo.replacen(
            "topic = \"baw1/hts1/TI-205\"",
            "topic = \"spb:baw1/gw3/HTS:Inputs/TI-205\"",
            1,
        );
        assert_ne!(on_spb, demo);
        let e = refused(&on_spb);
        assert!(e.to_string().contains("need a [sparkplug] table"), "{e}");
        let with_table = format!("{on_spb}\n[sparkplug]\nreorder_timeout = \"1 s\"\n");
        let s = check(&with_table).expect("valid with [sparkplug]");
        let spb = s.sparkplug.as_ref().expect("sparkplug settings");
        assert_eq!(spb.group_id, "baw1", "the site by default");
        assert_eq!(spb.edge_node_id, "eqwatch");
        assert!(spb.publish);
        assert_eq!(spb.reorder_timeout, std::time::Duration::from_secs(1));
        for (bad, says) in [
            ("spb:baw1:TI-205", "must be <group>/<edge node>"),
            ("spb:baw1/gw3/HTS/x:TI-205", "must be <group>/<edge node>"),
            ("spb:baw1/gw3/HTS", "expected spb:"),
            ("spb:baw1/gw3:", "metric name after `:` is empty"),
        ] {
            let text = with_table.replacen("spb:baw1/gw3/HTS:Inputs/TI-205", bad, 1);
            let e = refused(&text);
            assert!(e.to_string().contains(says), "{bad}: {e}");
            assert!(e.to_string().contains("temperature[0].topic"), "{bad}: {e}");
        }
        let e = refused(&with_table.replacen(
            "reorder_timeout = \"1 s\"",
            "reorder_timeout = \"5 min\"\ngroup_id = \"a/b\"",
            1,
        ));
        assert!(e.to_string().contains("sparkplug.reorder_timeout"), "{e}");
        assert!(e.to_string().contains("sparkplug.group_id"), "{e}");
        // An analyser message cannot be one Sparkplug metric.
        let e = refused(&format!(
            "{}\n[sparkplug]\n",
            demo.replacen(
                "topic = \"baw1/hts1/AI-201\"",
                "topic = \"spb:baw1/gw3:AI-201\"",
                1
            )
        ));
        assert!(
            e.to_string().contains("one spb: reference per component"),
            "{e}"
        );
    }

    #[test]
    fn the_timestamp_window_is_read_from_its_section_or_defaulted() {
        use std::time::Duration;
        let demo = include_str!("../../../config/demo-plant.toml");
        let s = check(demo).expect("demo");
        // Defaults: 5 min ahead, 7 d behind (ClockWindow::default).
        assert!(
            s.reactors
                .iter()
                .all(|r| r.spec.clock.max_ahead == Duration::from_secs(300)
                    && r.spec.clock.max_behind == Duration::from_secs(7 * 86_400))
        );
        let text = format!("{demo}\n[timestamps]\nmax_ahead = \"1 min\"\nmax_behind = \"2 d\"\n");
        let s = check(&text).expect("with a window");
        assert!(
            s.reactors
                .iter()
                .all(|r| r.spec.clock.max_ahead == Duration::from_secs(60)
                    && r.spec.clock.max_behind == Duration::from_secs(2 * 86_400))
        );
        let e = refused(&format!("{demo}\n[timestamps]\nmax_ahead = \"0 s\"\n"));
        assert!(e.to_string().contains("timestamps.max_ahead"), "{e}");
    }

    #[test]
    fn broken_no_reactors() {
        assert_problems(
            "no-reactors.toml",
            &broken("no-reactors.toml"),
            &[("reactors", "no reactors")],
        );
    }

    #[test]
    fn live_page_users_need_a_valid_hash_known_commands_and_the_allow_list() {
        // Invented users; the hash is Python 3.11 hashlib's
        // pbkdf2_hmac("sha256", b"op-demo-pass", b"eqwatch-demo-salt", 1000, 32).
        let base = with_broker("url = \"mqtt://127.0.0.1\"");
        let hash = "pbkdf2-sha256$1000$ZXF3YXRjaC1kZW1vLXNhbHQ=$0LtlutJQBJaSKWo242z0OAu+SjoKhrbndLvk80J69fY=";
        let ok = format!(
            "{base}\n[commands]\nallowed_users = [\"op-demo\"]\n[http.users.op-demo]\npassword_hash = \"{hash}\"\nmay = [\"acknowledge\", \"shelve\"]\n[http.users.viewer]\npassword_hash = \"{hash}\"\n"
        );
        let s = check(&ok).unwrap();
        assert_eq!(s.http_listen, Some(([127, 0, 0, 1], 9873).into()));
        let names: Vec<&str> = s.http_users.iter().map(|u| u.name.as_str()).collect();
        assert_eq!(names, ["op-demo", "viewer"]);
        assert!(s.http_users[1].may.is_empty());
        let bad = format!(
            "{base}\n[http.users.stranger]\npassword_hash = \"{hash}\"\nmay = [\"acknowledge\", \"reset\"]\n[http.users.plain]\npassword_hash = \"hunter2\"\n"
        );
        assert_problems(
            "users",
            &refused(&bad),
            &[
                ("http.users.plain.password_hash", "hash-password"),
                ("http.users.stranger.may[1]", "not a page command"),
                ("http.users.stranger.may", "not in [commands] allowed_users"),
            ],
        );
    }

    #[test]
    fn http_and_prefix_options() {
        // Invented config for the test.
        let base = with_broker("url = \"mqtt://127.0.0.1\"");
        let off = format!("{base}\n[http]\nlisten = \"off\"\n");
        assert_eq!(check(&off).unwrap().http_listen, None);
        let v6 = format!("{base}\n[http]\nlisten = \"[::1]:9500\"\n");
        assert_eq!(
            check(&v6).unwrap().http_listen,
            Some("[::1]:9500".parse().unwrap())
        );
        let prefix = base.replace(
            "site = \"baw1\"",
            "site = \"baw1\"\ntopic_prefix = \"plant/eq/\"\natmosphere = \"0.3 bar\"",
        );
        let e = refused(&prefix);
        assert_problems(
            "prefix",
            &e,
            &[
                ("topic_prefix", "ends with `/`"),
                ("atmosphere", "expected 0.5 to 1.1 bar absolute"),
            ],
        );
        let atm = base.replace(
            "site = \"baw1\"",
            "site = \"baw1\"\natmosphere = \"950 mbar\"",
        );
        assert!((check(&atm).unwrap().atmosphere_bar - 0.95).abs() < 1e-12);
    }
}
