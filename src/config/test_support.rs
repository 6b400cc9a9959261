//! Helpers shared by the configuration tests.
//!
//! Check values: the demo plant's reactors, tags and topics are those of the
//! lead's brief for `config/demo-plant.toml` (invented plant data); every other
//! figure is an invented config for the test. Expected messages are this module's
//! own wording (and the unit lists of `units.rs`).

use std::env::VarError;
use std::path::{Path, PathBuf};

use crate::config::error::ConfigErrors;
use crate::config::files::load;
use crate::config::from_str_with_env;
use crate::config::settings::Settings;

pub(crate) fn config_dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("config")
}

pub(crate) fn no_env(_: &str) -> Result<String, VarError> {
    Err(VarError::NotPresent)
}

/// Validates text with an empty environment, paths relative to `base`.
pub(crate) fn check_in(text: &str, base: &Path) -> Result<Settings, ConfigErrors> {
    from_str_with_env(text, base, &no_env)
}

pub(crate) fn check(text: &str) -> Result<Settings, ConfigErrors> {
    check_in(text, Path::new("."))
}

pub(crate) fn refused(text: &str) -> ConfigErrors {
    match check(text) {
        Ok(_) => panic!("accepted:\n{text}"),
        Err(e) => e,
    }
}

/// Asserts that `e` holds exactly the expected problems: (key path, part of message).
pub(crate) fn assert_problems(what: &str, e: &ConfigErrors, expected: &[(&str, &str)]) {
    for (path, text) in expected {
        assert!(
            e.problems
                .iter()
                .any(|p| p.path == *path && p.message.contains(text)),
            "{what}: no problem at {path} containing {text:?}; got:\n{e}"
        );
    }
    assert_eq!(
        e.problems.len(),
        expected.len(),
        "{what}: other problems than expected:\n{e}"
    );
}

pub(crate) fn broken(name: &str) -> ConfigErrors {
    match load(&config_dir().join("broken").join(name)) {
        Ok(_) => panic!("config/broken/{name} was accepted"),
        Err(e) => e,
    }
}

// Invented config for the test: one valid high-temperature shift reactor.
pub(crate) const REACTOR: &str = r#"
[journal]
dir = "var/journal"

[reactors.hts1]
reactions = [{ equation = "CO + H2O = CO2 + H2", k_source = "xu-froment-1989" }]

[reactors.hts1.composition]
topic = "baw1/hts1/AI-201"
basis = "dry"
components = ["H2", "N2", "CO", "CO2", "CH4", "Ar"]
max_age = "15 min"

[[reactors.hts1.temperature]]
topic = "baw1/hts1/TI-205"
unit = "degC"
max_age = "2 min"

[reactors.hts1.pressure]
topic = "baw1/hts1/PI-202"
unit = "barg"
max_age = "2 min"

[reactors.hts1.steam_ratio]
value = 0.48
"#;

pub(crate) fn with_broker(broker: &str) -> String {
    format!("site = \"baw1\"\n\n[broker]\n{broker}\n{REACTOR}")
}
