//! The `[broker]` and `[journal]` sections: URL, TLS files, credentials, limits, journal caps.

use std::path::{Path, PathBuf};
use std::time::Duration;

use crate::config::EnvLookup;
use crate::config::duration::show_duration;
use crate::config::error::{ConfigErrors, Problems};
use crate::config::files::{password_file, readable_file};
use crate::config::raw::{RawBroker, RawJournal};
use crate::config::settings::{BrokerSettings, JournalSettings, MqttProtocol, Settings};
use crate::config::validate::{DurationRule, NANOSECOND, duration_at};

/// `mqtt://host[:port]` or `mqtts://host[:port]`: (tls, host, port).
fn broker_url(problems: &mut Problems, url: &str) -> (bool, String, u16) {
    let path = "broker.url";
    let expected =
        "expected mqtt://host[:port] or mqtts://host[:port], e.g. \"mqtt://127.0.0.1:1883\"";
    let written = url.trim();
    let scheme = |name: &str| {
        written
            .get(..name.len())
            .is_some_and(|s| s.eq_ignore_ascii_case(name))
    };
    let (tls, rest) = if scheme("mqtts://") {
        (true, written.get(8..).unwrap_or(""))
    } else if scheme("mqtt://") {
        (false, written.get(7..).unwrap_or(""))
    } else {
        problems.add(path, format!("\"{url}\": unknown scheme; {expected}"));
        return (false, String::new(), 1883);
    };
    let default_port = if tls { 8883 } else { 1883 };
    let rest = rest.strip_suffix('/').unwrap_or(rest);
    if rest.contains('@') {
        problems.add(
            path,
            format!(
                "\"{url}\" carries user information; give broker.username and password_file or password_env instead"
            ),
        );
        return (tls, String::new(), default_port);
    }
    if rest.contains(['/', '?', '#']) {
        problems.add(path, format!("\"{url}\" has a path or query; {expected}"));
        return (tls, String::new(), default_port);
    }
    let (host, port_text) = if let Some(inner) = rest.strip_prefix('[') {
        match inner.split_once(']') {
            Some((h, after)) => match after.strip_prefix(':') {
                Some(port) => (h, Some(port)),
                None if after.is_empty() => (h, None),
                None => {
                    problems.add(path, format!("\"{url}\": {expected}"));
                    return (tls, String::new(), default_port);
                }
            },
            None => {
                problems.add(path, format!("\"{url}\": `[` without `]`; {expected}"));
                return (tls, String::new(), default_port);
            }
        }
    } else if rest.matches(':').count() > 1 {
        problems.add(
            path,
            format!("\"{url}\": write an IPv6 address in brackets, e.g. mqtt://[::1]:1883"),
        );
        return (tls, String::new(), default_port);
    } else {
        match rest.split_once(':') {
            Some((h, port)) => (h, Some(port)),
            None => (rest, None),
        }
    };
    if host.is_empty() || host.contains(char::is_whitespace) {
        problems.add(path, format!("\"{url}\" has no host; {expected}"));
    }
    let port = match port_text {
        None => default_port,
        Some(t) => match t.parse::<u16>() {
            Ok(n) if n > 0 => n,
            _ => {
                problems.add(
                    path,
                    format!("\"{url}\": port \"{t}\" is not a number from 1 to 65535"),
                );
                default_port
            }
        },
    };
    let host = host.to_string();
    (tls, host, port)
}

pub(crate) fn broker(
    problems: &mut Problems,
    raw: &RawBroker,
    site: &str,
    base: &Path,
    env: EnvLookup,
) -> BrokerSettings {
    let (tls, host, port) = broker_url(problems, &raw.url);
    let protocol = protocol(problems, raw);
    let client_id = client_id(problems, raw, site, protocol);
    let keep_alive = keep_alive(problems, raw);
    let session_expiry = session_expiry(problems, raw);
    let connect_timeout = connect_timeout(problems, raw);
    let (username, password) = credentials(problems, raw, base, env, protocol);
    let [ca_file, client_cert_file, client_key_file] = tls_files(problems, raw, base, tls);
    let max_packet_bytes = max_packet_bytes(problems, raw);
    let (reconnect_min, reconnect_max) = reconnect_waits(problems, raw);
    let inflight = inflight(problems, raw);
    BrokerSettings {
        host,
        port,
        tls,
        client_id,
        protocol,
        keep_alive,
        session_expiry,
        connect_timeout,
        username,
        password,
        ca_file,
        client_cert_file,
        client_key_file,
        max_packet_bytes,
        reconnect_min,
        reconnect_max,
        inflight,
    }
}

/// `broker.protocol`: MQTT 3.1.1 (the default); 5 is refused by this build.
fn protocol(problems: &mut Problems, raw: &RawBroker) -> MqttProtocol {
    match raw.protocol.as_deref().map(str::trim) {
        None | Some("3.1.1") | Some("311") => MqttProtocol::V311,
        Some("5") | Some("5.0") => {
            problems.add(
                "broker.protocol",
                "MQTT 5 is not supported by this build yet; use \"3.1.1\" (a persistent session comes from session_expiry)",
            );
            MqttProtocol::V5
        }
        Some(other) => {
            problems.add(
                "broker.protocol",
                format!("unknown MQTT protocol \"{other}\"; expected \"3.1.1\" or \"5\""),
            );
            MqttProtocol::V311
        }
    }
}

/// `broker.client_id`, by default `eqwatch-<site>` (`eqwatch-<site>-<shard>` for a
/// shard: `site` is then `<site>-<shard>`), within what the protocol allows.
fn client_id(
    problems: &mut Problems,
    raw: &RawBroker,
    site: &str,
    protocol: MqttProtocol,
) -> String {
    let client_id = raw
        .client_id
        .clone()
        .unwrap_or_else(|| format!("eqwatch-{site}"));
    let id_path = "broker.client_id";
    let from_default = if raw.client_id.is_none() {
        " (the default, eqwatch-<site>; set broker.client_id)"
    } else {
        ""
    };
    if client_id.is_empty() {
        problems.add(
            id_path,
            "is empty; give the broker a client id, e.g. \"eqwatch-baw1\"",
        );
    } else if protocol == MqttProtocol::V311 && client_id.len() > 23 {
        // MQTT 3.1.1 §3.1.3.1: servers must accept 1 to 23 bytes; longer ids may be refused.
        problems.add(
            id_path,
            format!(
                "\"{client_id}\" is {} bytes{from_default}; MQTT 3.1.1 brokers need accept only 1 to 23 (spec 3.1.3.1): shorten it",
                client_id.len()
            ),
        );
    } else if client_id.len() > 65_535 {
        problems.add(id_path, "is longer than MQTT allows (65535 bytes)");
    }
    client_id
}

/// The session kept when `broker.session_expiry` is not given: a day.
const DEFAULT_SESSION_EXPIRY: Duration = Duration::from_secs(86_400);

/// `broker.connect_timeout`: whole seconds from 1 s to 600 s (default 30 s). A
/// connection over TLS takes three round trips or more, so a 1 s round trip needs 3 s
/// and a satellite hop more.
fn connect_timeout(problems: &mut Problems, raw: &RawBroker) -> Duration {
    let t = duration_at(
        problems,
        "broker.connect_timeout",
        raw.connect_timeout.as_deref(),
        DurationRule {
            default: Some(Duration::from_secs(30)),
            min: Duration::from_secs(1),
            why_min: "a connection takes at least one round trip",
        },
    );
    if t < Duration::from_secs(1) {
        // Already said by `duration_at`.
    } else if t.subsec_nanos() != 0 {
        problems.add(
            "broker.connect_timeout",
            format!(
                "{} is not a whole number of seconds (the MQTT client counts it in seconds)",
                show_duration(t)
            ),
        );
    } else if t > Duration::from_secs(600) {
        problems.add(
            "broker.connect_timeout",
            format!(
                "{} is longer than 10 min: a dead link would hold every write that long",
                show_duration(t)
            ),
        );
    }
    t
}

/// `broker.keep_alive`: whole seconds from 5 s to 65535 s.
fn keep_alive(problems: &mut Problems, raw: &RawBroker) -> Duration {
    // rumqttc 0.25.1 asserts keep-alive >= 5 s for MQTT 5 (src/v5/mod.rs
    // `MqttOptions::set_keep_alive`) and sends whole seconds as u16 in both protocols
    // (src/eventloop.rs, src/v5/eventloop.rs: `as_secs() as u16`).
    let keep_alive = duration_at(
        problems,
        "broker.keep_alive",
        raw.keep_alive.as_deref(),
        DurationRule {
            default: Some(Duration::from_secs(30)),
            min: Duration::from_secs(5),
            why_min: "the MQTT client refuses keep-alives under 5 s",
        },
    );
    if keep_alive.subsec_nanos() != 0 {
        problems.add(
            "broker.keep_alive",
            format!(
                "{} is not a whole number of seconds (MQTT counts keep-alive in seconds)",
                show_duration(keep_alive)
            ),
        );
    } else if keep_alive.as_secs() > u64::from(u16::MAX) {
        problems.add(
            "broker.keep_alive",
            format!(
                "{} is above the MQTT limit of 65535 s",
                show_duration(keep_alive)
            ),
        );
    }
    keep_alive
}

/// `broker.session_expiry`: whole seconds, zero (no persistent session) by default.
fn session_expiry(problems: &mut Problems, raw: &RawBroker) -> Duration {
    let session_expiry = duration_at(
        problems,
        "broker.session_expiry",
        raw.session_expiry.as_deref(),
        DurationRule {
            // A persistent session by default: the broker keeps the subscriptions and
            // the QoS 1 input published while the daemon is away or the link is down.
            default: Some(DEFAULT_SESSION_EXPIRY),
            min: Duration::ZERO,
            why_min: "",
        },
    );
    if session_expiry.subsec_nanos() != 0 {
        problems.add(
            "broker.session_expiry",
            format!(
                "{} is not a whole number of seconds",
                show_duration(session_expiry)
            ),
        );
    } else if session_expiry.as_secs() > u64::from(u32::MAX) {
        // MQTT 5 §3.1.2.11.2: a four-byte interval in seconds.
        problems.add(
            "broker.session_expiry",
            format!(
                "{} is above the MQTT limit of 4294967295 s",
                show_duration(session_expiry)
            ),
        );
    }
    session_expiry
}

/// `broker.username` and the password from `password_file` or `password_env` (not both).
fn credentials(
    problems: &mut Problems,
    raw: &RawBroker,
    base: &Path,
    env: EnvLookup,
    protocol: MqttProtocol,
) -> (Option<String>, Option<String>) {
    let username = match &raw.username {
        Some(u) if u.is_empty() => {
            problems.add(
                "broker.username",
                "is empty; give the user name or remove the key",
            );
            None
        }
        other => other.clone(),
    };
    let password = match (&raw.password_file, &raw.password_env) {
        (Some(_), Some(_)) => {
            problems.add(
                "broker.password_env",
                "give password_file or password_env, not both",
            );
            None
        }
        (Some(file), None) => password_file(problems, file, base),
        (None, Some(var)) => {
            if var.is_empty() || var.contains(['=', '\0']) {
                problems.add(
                    "broker.password_env",
                    format!("\"{var}\" is not an environment variable name"),
                );
                None
            } else {
                match env(var) {
                    Ok(secret) if secret.is_empty() => {
                        problems.add(
                            "broker.password_env",
                            format!("environment variable {var} is empty"),
                        );
                        None
                    }
                    Ok(secret) => Some(secret),
                    Err(std::env::VarError::NotPresent) => {
                        problems.add(
                            "broker.password_env",
                            format!("environment variable {var} is not set"),
                        );
                        None
                    }
                    Err(std::env::VarError::NotUnicode(_)) => {
                        problems.add(
                            "broker.password_env",
                            format!("environment variable {var} is not valid UTF-8"),
                        );
                        None
                    }
                }
            }
        }
        (None, None) => None,
    };
    let has_password = raw.password_file.is_some() || raw.password_env.is_some();
    if has_password && raw.username.is_none() && protocol == MqttProtocol::V311 {
        // MQTT 3.1.1 §3.1.2.9: the password flag needs the user name flag.
        problems.add(
            "broker.username",
            "missing; MQTT 3.1.1 sends a password only with a user name",
        );
    }
    (username, password)
}

/// `broker.ca_file`, `client_cert_file` and `client_key_file`: readable, only for mqtts://,
/// a certificate and its key together.
fn tls_files(
    problems: &mut Problems,
    raw: &RawBroker,
    base: &Path,
    tls: bool,
) -> [Option<PathBuf>; 3] {
    let mut tls_file = |key: &str, given: &Option<String>| -> Option<PathBuf> {
        let given = given.as_ref()?;
        let path = format!("broker.{key}");
        if !tls {
            problems.add(
                path,
                "only for an mqtts:// broker url; remove it or use mqtts://",
            );
            return None;
        }
        Some(readable_file(problems, &path, base, given))
    };
    let ca_file = tls_file("ca_file", &raw.ca_file);
    let client_cert_file = tls_file("client_cert_file", &raw.client_cert_file);
    let client_key_file = tls_file("client_key_file", &raw.client_key_file);
    if tls {
        match (&raw.client_cert_file, &raw.client_key_file) {
            (Some(_), None) => problems.add(
                "broker.client_key_file",
                "missing; a client certificate needs its key",
            ),
            (None, Some(_)) => problems.add(
                "broker.client_cert_file",
                "missing; a client key needs its certificate",
            ),
            _ => {}
        }
    }
    [ca_file, client_cert_file, client_key_file]
}

/// `broker.max_packet_bytes`: 1 KiB to 256 MiB, 256 KiB by default.
fn max_packet_bytes(problems: &mut Problems, raw: &RawBroker) -> usize {
    const MIN_PACKET: i64 = 1024;
    const MAX_PACKET: i64 = 256 * 1024 * 1024;
    match raw.max_packet_bytes {
        None => 256 * 1024,
        Some(n) if (MIN_PACKET..=MAX_PACKET).contains(&n) => n as usize,
        Some(n) => {
            problems.add(
                "broker.max_packet_bytes",
                format!(
                    "{n} is outside 1024 (1 KiB) to 268435456 (256 MiB, the MQTT packet limit)"
                ),
            );
            256 * 1024
        }
    }
}

/// `broker.reconnect_min` and `reconnect_max`: above zero, the first not above the longest.
fn reconnect_waits(problems: &mut Problems, raw: &RawBroker) -> (Duration, Duration) {
    let reconnect_min = duration_at(
        problems,
        "broker.reconnect_min",
        raw.reconnect_min.as_deref(),
        DurationRule {
            default: Some(Duration::from_millis(250)),
            min: NANOSECOND,
            why_min: "a zero wait would reconnect in a tight loop",
        },
    );
    let reconnect_max = duration_at(
        problems,
        "broker.reconnect_max",
        raw.reconnect_max.as_deref(),
        DurationRule {
            default: Some(Duration::from_secs(30)),
            min: NANOSECOND,
            why_min: "a zero wait would reconnect in a tight loop",
        },
    );
    if reconnect_min > reconnect_max {
        problems.add(
            "broker.reconnect_min",
            format!(
                "{} is above reconnect_max ({}); the first wait must not exceed the longest",
                show_duration(reconnect_min),
                show_duration(reconnect_max)
            ),
        );
    }
    (reconnect_min, reconnect_max)
}

/// `broker.inflight`: 1 to 65535, 64 by default.
fn inflight(problems: &mut Problems, raw: &RawBroker) -> u16 {
    match raw.inflight {
        None => 64,
        Some(n) => match u16::try_from(n) {
            Ok(v) if v > 0 => v,
            _ => {
                problems.add(
                    "broker.inflight",
                    format!("{n} is outside 1 to 65535 (MQTT packet ids are 16-bit)"),
                );
                64
            }
        },
    }
}

pub(crate) fn journal(problems: &mut Problems, raw: &RawJournal, base: &Path) -> JournalSettings {
    if raw.dir.trim().is_empty() {
        problems.add(
            "journal.dir",
            "is empty; give a folder, e.g. \"var/journal\"",
        );
    }
    const MIN_FILE: i64 = 4096;
    let max_file_bytes = match raw.max_file_bytes {
        None => 16 * 1024 * 1024,
        Some(n) if n >= MIN_FILE => n,
        Some(n) => {
            problems.add(
                "journal.max_file_bytes",
                format!("{n} is below 4096 bytes; a journal file holds many records"),
            );
            MIN_FILE
        }
    };
    let max_total_bytes = match raw.max_total_bytes {
        None => (256 * 1024 * 1024).max(max_file_bytes),
        Some(n) if n >= max_file_bytes => n,
        Some(n) => {
            problems.add(
                "journal.max_total_bytes",
                format!("{n} is below journal.max_file_bytes ({max_file_bytes})"),
            );
            max_file_bytes
        }
    };
    let fsync_interval = duration_at(
        problems,
        "journal.fsync_interval",
        raw.fsync_interval.as_deref(),
        DurationRule {
            default: Some(Duration::from_secs(1)),
            min: NANOSECOND,
            why_min: "write \"1 s\" or similar",
        },
    );
    const MIB: i64 = 1024 * 1024;
    let memory_max_bytes = match raw.memory_max_bytes {
        None => 4 * MIB,
        Some(n) if (64 * 1024..=1024 * MIB).contains(&n) => n,
        Some(n) => {
            problems.add(
                "journal.memory_max_bytes",
                format!(
                    "{n} is outside 65536 to 1073741824 bytes (64 KiB to 1 GiB): the results \
                     held while the disk is full or unwritable"
                ),
            );
            4 * MIB
        }
    };
    JournalSettings {
        dir: base.join(&raw.dir),
        // Inside 64 KiB to 1 GiB (checked above).
        memory_max_bytes: usize::try_from(memory_max_bytes).unwrap_or(usize::MAX),
        // Both were checked positive above.
        max_file_bytes: max_file_bytes.unsigned_abs(),
        max_total_bytes: max_total_bytes.unsigned_abs(),
        fsync_interval,
    }
}

// ---------------------------------------------------------------------------
// Reactors

/// Replaces the configured broker address with `url` (`mqtt://host[:port]` or
/// `mqtts://...`), as `eqwatch run --broker` does; validated like the file's `broker.url`.
pub fn override_broker(settings: &mut Settings, url: &str) -> Result<(), ConfigErrors> {
    let mut problems = Problems(Vec::new());
    let (tls, host, port) = broker_url(&mut problems, url);
    if !problems.is_empty() {
        return Err(problems.into_errors());
    }
    settings.broker.tls = tls;
    settings.broker.host = host;
    settings.broker.port = port;
    Ok(())
}

#[cfg(test)]
mod tests {
    //! Check values: see `test_support` (the demo plant's own data, else invented).

    use crate::config::test_support::{
        assert_problems, broken, check, check_in, refused, with_broker,
    };
    use crate::config::{from_str, from_str_with_env};
    use std::env::VarError;
    use std::fs;
    use std::time::Duration;

    #[test]
    fn broken_broker() {
        assert_problems(
            "bad-broker.toml",
            &broken("bad-broker.toml"),
            &[
                (
                    "broker.url",
                    "port \"99999\" is not a number from 1 to 65535",
                ),
                (
                    "broker.client_id",
                    "is 26 bytes; MQTT 3.1.1 brokers need accept only 1 to 23",
                ),
                ("broker.keep_alive", "2 s is too short; at least 5 s"),
                ("broker.session_expiry", "\"soon\" is not a number"),
                (
                    "broker.password_env",
                    "give password_file or password_env, not both",
                ),
                ("broker.ca_file", "only for an mqtts:// broker url"),
                ("broker.max_packet_bytes", "512 is outside 1024 (1 KiB)"),
                (
                    "broker.reconnect_min",
                    "1 min is above reconnect_max (30 s)",
                ),
                ("broker.inflight", "0 is outside 1 to 65535"),
                ("journal.fsync_interval", "must be above zero"),
                (
                    "http.listen",
                    "\"localhost:9873\" is not an address and port",
                ),
            ],
        );
    }

    #[test]
    fn password_from_file_or_environment() {
        // Invented secrets for the test.
        let dir = tempfile::tempdir().unwrap();
        fs::write(dir.path().join("broker.pass"), "s3cret-from-file\n").unwrap();
        let text = with_broker(
            "url = \"mqtt://127.0.0.1\"\nusername = \"eqwatch\"\npassword_file = \"broker.pass\"",
        );
        let s = match check_in(&text, dir.path()) {
            Ok(s) => s,
            Err(e) => panic!("{e}"),
        };
        assert_eq!(s.broker.password.as_deref(), Some("s3cret-from-file"));
        assert_eq!(s.broker.username.as_deref(), Some("eqwatch"));

        let env_text = with_broker(
            "url = \"mqtt://127.0.0.1\"\nusername = \"eqwatch\"\npassword_env = \"EQWATCH_TEST_PASSWORD_5C1D\"",
        );
        let env = |name: &str| {
            if name == "EQWATCH_TEST_PASSWORD_5C1D" {
                Ok("s3cret-from-env".to_string())
            } else {
                Err(VarError::NotPresent)
            }
        };
        let s = match from_str_with_env(&env_text, dir.path(), &env) {
            Ok(s) => s,
            Err(e) => panic!("{e}"),
        };
        assert_eq!(s.broker.password.as_deref(), Some("s3cret-from-env"));

        // The process environment: a name no one sets.
        let unset = with_broker(
            "url = \"mqtt://127.0.0.1\"\nusername = \"eqwatch\"\npassword_env = \"EQWATCH_TEST_UNSET_9E42B7_PASSWORD\"",
        );
        match from_str(&unset, dir.path()) {
            Ok(_) => panic!("an unset variable was accepted"),
            Err(e) => assert_problems(
                "unset",
                &e,
                &[(
                    "broker.password_env",
                    "environment variable EQWATCH_TEST_UNSET_9E42B7_PASSWORD is not set",
                )],
            ),
        }

        let missing = with_broker(
            "url = \"mqtt://127.0.0.1\"\nusername = \"eqwatch\"\npassword_file = \"nowhere.pass\"",
        );
        let e = match check_in(&missing, dir.path()) {
            Ok(_) => panic!("a missing password file was accepted"),
            Err(e) => e,
        };
        assert_problems(
            "missing file",
            &e,
            &[("broker.password_file", "nowhere.pass: no such file")],
        );

        // MQTT 3.1.1 sends a password only with a user name; MQTT 5 need not.
        let no_user = with_broker("url = \"mqtt://127.0.0.1\"\npassword_file = \"broker.pass\"");
        let e = match check_in(&no_user, dir.path()) {
            Ok(_) => panic!("a password without user was accepted for 3.1.1"),
            Err(e) => e,
        };
        assert_problems("no user", &e, &[("broker.username", "missing; MQTT 3.1.1")]);
        // MQTT 5 is refused as a whole until the client speaks it (one problem only).
        let v5 = no_user.replace("[broker]\n", "[broker]\nprotocol = \"5\"\n");
        let e = check_in(&v5, dir.path()).expect_err("MQTT 5 is not supported yet");
        assert_problems(
            "v5",
            &e,
            &[("broker.protocol", "not supported by this build")],
        );
    }

    #[test]
    fn broker_url_and_tls_files() {
        // Invented broker addresses and files for the test.
        let dir = tempfile::tempdir().unwrap();
        fs::write(
            dir.path().join("ca.pem"),
            "invented certificate for the test\n",
        )
        .unwrap();
        let text = with_broker("url = \"mqtts://broker.baw1.invalid\"\nca_file = \"ca.pem\"");
        let s = match check_in(&text, dir.path()) {
            Ok(s) => s,
            Err(e) => panic!("{e}"),
        };
        assert!(s.broker.tls);
        assert_eq!(s.broker.host, "broker.baw1.invalid");
        assert_eq!(s.broker.port, 8883, "mqtts default port");
        assert_eq!(s.broker.ca_file, Some(dir.path().join("ca.pem")));

        let text = with_broker(
            "url = \"mqtts://broker.baw1.invalid:8884\"\nca_file = \"absent.pem\"\nclient_cert_file = \"ca.pem\"",
        );
        let e = match check_in(&text, dir.path()) {
            Ok(_) => panic!("a missing ca file was accepted"),
            Err(e) => e,
        };
        assert_problems(
            "tls",
            &e,
            &[
                ("broker.ca_file", "absent.pem: no such file"),
                (
                    "broker.client_key_file",
                    "missing; a client certificate needs its key",
                ),
            ],
        );

        let s = check(&with_broker("url = \"MQTT://[::1]\"")).unwrap();
        assert_eq!((s.broker.host.as_str(), s.broker.port), ("::1", 1883));
        let s = check(&with_broker("url = \"mqtt://Broker.BAW1.invalid:1884/\"")).unwrap();
        assert_eq!(
            (s.broker.host.as_str(), s.broker.port),
            ("Broker.BAW1.invalid", 1884)
        );
        for (url, needle) in [
            ("tcp://127.0.0.1:1883", "unknown scheme"),
            ("mqtt://", "has no host"),
            ("mqtt://::1", "IPv6 address in brackets"),
            ("mqtt://user:pw@127.0.0.1", "carries user information"),
            ("mqtt://127.0.0.1/topic", "has a path"),
        ] {
            let e = refused(&with_broker(&format!("url = \"{url}\"")));
            assert_problems(url, &e, &[("broker.url", needle)]);
        }
    }

    #[test]
    fn broker_limits() {
        // Invented broker settings for the test.
        let base = "url = \"mqtt://127.0.0.1\"\n";
        let ok = |extra: &str| match check(&with_broker(&format!("{base}{extra}"))) {
            Ok(s) => s.broker,
            Err(e) => panic!("{extra}: {e}"),
        };
        let b = ok("");
        assert_eq!(b.client_id, "eqwatch-baw1", "default client id");
        assert_eq!(b.keep_alive, Duration::from_secs(30));
        // A persistent session by default (issue: a clean session lost what the broker
        // held for the daemon over a restart); a clean one on request.
        assert_eq!(b.session_expiry, Duration::from_secs(86_400));
        assert_eq!(
            ok("session_expiry = \"0 s\"").session_expiry,
            Duration::ZERO
        );
        assert_eq!(b.connect_timeout, Duration::from_secs(30));
        assert_eq!(
            ok("connect_timeout = \"3 s\"").connect_timeout,
            Duration::from_secs(3)
        );
        assert_eq!(b.inflight, 64);
        assert_eq!(b.max_packet_bytes, 262_144);
        assert_eq!(
            ok("keep_alive = \"5 s\"").keep_alive,
            Duration::from_secs(5)
        );
        assert_eq!(ok("inflight = 65535").inflight, 65_535);
        assert_eq!(ok("max_packet_bytes = 1024").max_packet_bytes, 1024);
        let long_id = "client_id = \"eqwatch-brackwater-train-1\"\n";
        assert!(
            check(&with_broker(&format!("{base}{long_id}"))).is_err(),
            "MQTT 3.1.1 refuses ids over 23 bytes"
        );
        for (extra, path, needle) in [
            (
                "keep_alive = \"5.5 s\"",
                "broker.keep_alive",
                "not a whole number of seconds",
            ),
            (
                "keep_alive = \"1 d\"",
                "broker.keep_alive",
                "above the MQTT limit of 65535 s",
            ),
            (
                "keep_alive = \"0 s\"",
                "broker.keep_alive",
                "must be above zero",
            ),
            (
                "session_expiry = \"200 y\"",
                "broker.session_expiry",
                "unknown unit \"y\"",
            ),
            (
                "connect_timeout = \"0.5 s\"",
                "broker.connect_timeout",
                "500 ms is too short",
            ),
            (
                "connect_timeout = \"1.5 s\"",
                "broker.connect_timeout",
                "not a whole number of seconds",
            ),
            (
                "connect_timeout = \"1 h\"",
                "broker.connect_timeout",
                "longer than 10 min",
            ),
            (
                "inflight = 65536",
                "broker.inflight",
                "65536 is outside 1 to 65535",
            ),
            (
                "inflight = -1",
                "broker.inflight",
                "-1 is outside 1 to 65535",
            ),
            (
                "max_packet_bytes = 268435457",
                "broker.max_packet_bytes",
                "is outside 1024",
            ),
            ("client_id = \"\"", "broker.client_id", "is empty"),
            (
                "protocol = \"4\"",
                "broker.protocol",
                "expected \"3.1.1\" or \"5\"",
            ),
            (
                "reconnect_min = \"0 s\"",
                "broker.reconnect_min",
                "must be above zero",
            ),
        ] {
            let e = refused(&with_broker(&format!("{base}{extra}")));
            assert_problems(extra, &e, &[(path, needle)]);
        }
        // The default client id is checked too.
        let text =
            with_broker(base).replace("site = \"baw1\"", "site = \"brackwater-ammonia-works-1\"");
        let e = refused(&text);
        assert_problems(
            "default id",
            &e,
            &[(
                "broker.client_id",
                "(the default, eqwatch-<site>; set broker.client_id)",
            )],
        );
    }
}
