//! Plant configuration: one TOML file, read into `RawConfig` (serde, unknown keys
//! refused) and validated in one step into [`Settings`] (fixed units, built models),
//! collecting every problem with its key path (`reactors.lts1.composition.unit: ...`).
//!
//! Pure apart from reading the files the configuration names (species files, password
//! files) and environment variables for secrets; validation happens before any network
//! call, so nothing downstream sees an invalid option.
//!
//! The folder: `raw` (the file as written, serde types), `parse` (TOML to raw, serde errors
//! as key paths with line and column), `error` (problems and their key paths), `files` (the
//! only place that touches the file system), `duration`, `validate/` (one file per section:
//! `broker` with the journal, `reactor`, `inputs`; `watch` for drift, alerts, alarms and
//! commands), `settings` (what the rest of eqwatch takes) and `summary` (`eqwatch check`).
//! The public items are re-exported here, so callers write `crate::config::load`.
//!
//! What it may import: the numeric core (`crate::units`, `thermo`, `composition`,
//! `approach`, `equilibrium`, `monitor`), serde, toml and thiserror; never the shell
//! (`crate::daemon`, `pipeline`, `wire`, `replay`, `plot`, `sim`, `cli`), tokio, rumqttc or
//! tracing (`tests/architecture.rs` checks).

mod duration;
mod error;
mod files;
mod parse;
pub mod password;
mod raw;
mod settings;
mod summary;
#[cfg(test)]
mod test_support;
mod validate;

use std::path::Path;

use crate::config::parse::parse_raw;
use crate::config::validate::validate;

pub use crate::units::ScalarUnit;
pub use duration::{DurationError, parse_duration};
pub use error::{ConfigErrors, ConfigProblem};
pub use files::load;
pub use settings::{
    BrokerSettings, CommandSettings, CompositionSource, JournalSettings, MqttProtocol,
    ReactorSettings, ScalarDecoder, ScalarSource, Settings, SparkplugSettings, SpbRef,
    TrainSettings, Wiring,
};
pub use summary::summary;
pub use validate::broker::override_broker;

/// Validates configuration text; relative paths inside it are taken from `base_dir`.
/// Secrets named by `password_env` come from the process environment.
pub fn from_str(text: &str, base_dir: &Path) -> Result<Settings, ConfigErrors> {
    from_str_with_env(text, base_dir, &|name: &str| std::env::var(name))
}

/// Looks up an environment variable (injectable for tests).
pub(crate) type EnvLookup<'a> = &'a dyn Fn(&str) -> Result<String, std::env::VarError>;

pub(crate) fn from_str_with_env(
    text: &str,
    base_dir: &Path,
    env: EnvLookup,
) -> Result<Settings, ConfigErrors> {
    let raw = parse_raw(text)?;
    validate(&raw, base_dir, env)
}

#[cfg(test)]
mod tests {
    //! Check values: see `test_support` (the demo plant's own data, else invented).

    use crate::composition::Basis;
    use crate::config::files::load;
    use crate::config::settings::{CompositionSource, MqttProtocol, ScalarDecoder};
    use crate::config::summary::summary;
    use crate::config::test_support::{assert_problems, broken, config_dir};

    use crate::equilibrium::EosKind;
    use crate::monitor::spec::SteamRatioSpec;
    use crate::thermo::ksource::KSourceId;
    use crate::units::{
        CompositionUnit, PressureUnit, STANDARD_ATMOSPHERE_BAR, ScalarUnit, TemperatureUnit,
    };
    use std::net::SocketAddr;
    use std::time::Duration;

    #[test]
    fn demo_plant_parses() {
        let s = match load(&config_dir().join("demo-plant.toml")) {
            Ok(s) => s,
            Err(e) => panic!("demo plant refused:\n{e}"),
        };
        assert_eq!(s.site, "baw1");
        assert_eq!(s.topic_prefix, "eqwatch/baw1");
        assert_eq!(s.atmosphere_bar, STANDARD_ATMOSPHERE_BAR);
        assert_eq!(s.broker.host, "127.0.0.1");
        assert_eq!(s.broker.port, 1883);
        assert!(!s.broker.tls);
        assert_eq!(s.broker.protocol, MqttProtocol::V311);
        assert_eq!(s.broker.keep_alive, Duration::from_secs(15));
        assert_eq!(s.broker.session_expiry, Duration::from_secs(3600));
        assert_eq!(s.broker.reconnect_min, Duration::from_millis(250));
        assert_eq!(s.broker.password, None);
        assert!(s.journal.dir.ends_with("var/journal"));
        assert!(s.journal.dir.starts_with(config_dir()));
        assert_eq!(
            s.http_listen,
            Some(SocketAddr::from(([127, 0, 0, 1], 9873)))
        );

        let ids: Vec<&str> = s.reactors.iter().map(|r| r.spec.id.as_str()).collect();
        assert_eq!(ids, ["ref1", "hts1", "lts1", "mth1", "amc1"], "file order");
        let r = |id: &str| s.reactors.iter().find(|r| r.spec.id == id).unwrap();
        let key = |id: &str| s.species.get(r(id).spec.key_component).name.clone();

        let ref1 = r("ref1");
        assert_eq!(ref1.spec.reactions.len(), 2);
        assert!(
            ref1.spec
                .reactions
                .iter()
                .all(|(_, k)| k.id() == KSourceId::XuFroment1989)
        );
        assert_eq!(ref1.spec.composition.basis, Basis::Dry);
        assert_eq!(ref1.spec.model.names(), ["CH4", "CO", "CO2", "H2", "H2O"]);
        assert_eq!(ref1.spec.composition.lag, Duration::from_secs(60));
        let tis: Vec<&str> = ref1
            .wiring
            .temperatures
            .iter()
            .map(|t| t.topic.as_str())
            .collect();
        assert_eq!(tis, ["baw1/ref1/TI-105A", "baw1/ref1/TI-105B"]);
        assert_eq!(
            ref1.spec.temperatures[0].unit,
            ScalarUnit::Temperature(TemperatureUnit::Celsius)
        );
        assert_eq!(ref1.wiring.pressure.topic, "baw1/ref1/PI-102");
        assert_eq!(
            ref1.spec.pressure.unit,
            ScalarUnit::Pressure(PressureUnit::parse("barg").unwrap())
        );
        match (&ref1.spec.steam_ratio, &ref1.wiring.steam_ratio) {
            (Some(SteamRatioSpec::Measured(m)), Some(source)) => {
                assert_eq!(source.topic, "baw1/ref1/FY-110");
                assert_eq!(m.tag, "BAW1-FY-110");
                assert_eq!(source.decoder, ScalarDecoder::Number);
                assert_eq!(m.unit, ScalarUnit::Ratio);
            }
            other => panic!("ref1 steam ratio: {other:?}"),
        }
        assert_eq!(key("ref1"), "CH4", "default: first reactant of reforming");
        assert_eq!(ref1.spec.eos, EosKind::Ideal);
        assert_eq!(ref1.spec.uncertainty.temperature_k, 2.0);
        assert_eq!(ref1.spec.uncertainty.pressure_bar, 0.2);
        assert_eq!(ref1.spec.uncertainty.composition_rel, 0.02);
        assert_eq!(ref1.spec.uncertainty.steam_ratio_rel, 0.05);

        let hts1 = r("hts1");
        assert_eq!(
            hts1.spec.model.names(),
            ["H2", "N2", "CO", "CO2", "CH4", "Ar", "H2O"]
        );
        assert!(matches!(hts1.spec.steam_ratio, Some(SteamRatioSpec::Fixed(v)) if v == 0.48));
        assert_eq!(key("hts1"), "CO");

        let lts1 = r("lts1");
        assert_eq!(lts1.spec.reactions[0].1.id(), KSourceId::Moe1962);
        assert_eq!(lts1.spec.temperatures.len(), 2);
        assert_eq!(lts1.spec.model.band_ln, 0.01);
        assert_eq!(lts1.spec.transient_k_per_min, 2.0);
        match &lts1.wiring.composition {
            CompositionSource::Analyser {
                topic,
                values_pointer,
                ts_pointer,
                ..
            } => {
                assert_eq!(topic, "baw1/lts1/AI-301");
                assert_eq!(values_pointer, "/values");
                assert_eq!(ts_pointer.as_deref(), Some("/ts"));
            }
            other => panic!("lts1 source: {other:?}"),
        }
        match &lts1.wiring.steam_ratio {
            Some(m) => {
                assert_eq!(m.topic, "baw1/lts1/FY-310");
                assert!(
                    matches!(&m.decoder, ScalarDecoder::Json { value_pointer, .. } if value_pointer == "/value")
                );
            }
            other => panic!("lts1 steam ratio: {other:?}"),
        }

        let mth1 = r("mth1");
        assert_eq!(mth1.spec.reactions.len(), 2);
        assert!(
            mth1.spec
                .reactions
                .iter()
                .all(|(_, k)| k.id() == KSourceId::SpeciesData)
        );
        assert_eq!(mth1.spec.composition.unit, CompositionUnit::Percent);
        match &mth1.wiring.composition {
            CompositionSource::PerComponent { topics, decoder } => {
                let expected: Vec<(String, String)> = ["H2", "N2", "CH4", "Ar", "CO", "CO2"]
                    .iter()
                    .map(|n| (n.to_string(), format!("baw1/mth1/AI-401/{n}")))
                    .collect();
                assert_eq!(topics, &expected, "in the order of components");
                assert!(matches!(decoder, ScalarDecoder::Json { .. }));
            }
            other => panic!("mth1 source: {other:?}"),
        }
        assert!(matches!(mth1.spec.steam_ratio, Some(SteamRatioSpec::Fixed(v)) if v == 0.004));
        assert_eq!(key("mth1"), "CO");

        let amc1 = r("amc1");
        assert_eq!(amc1.spec.eos, EosKind::PengRobinson);
        assert_eq!(amc1.spec.composition.basis, Basis::Wet);
        assert_eq!(amc1.spec.model.names(), ["H2", "N2", "NH3", "Ar", "CH4"]);
        assert!(amc1.spec.steam_ratio.is_none());
        assert_eq!(key("amc1"), "NH3");

        let text = summary(&s);
        for needle in [
            "site          baw1",
            "mqtt://127.0.0.1:1883, MQTT 3.1.1, client id eqwatch-baw1",
            "results       eqwatch/baw1/<reactor>/...",
            "http          127.0.0.1:9873",
            "reactor       amc1: Ammonia converter bed 1 outlet",
            "  reaction    N2 + 3 H2 = 2 NH3",
            "K from moe-1962 (valid 400 to 1000 K); at 700 K ln K = ",
            "  eos         peng-robinson",
            "  analysis    BAW1-AI-401, one topic per component",
            "                CO2 on baw1/mth1/AI-401/CO2",
            "  steam ratio fixed at 0.48 mol H2O per mol dry gas",
            "  steam ratio BAW1-FY-110 on baw1/ref1/FY-110 (mol H2O/mol dry gas, bare number)",
            "  pressure    BAW1-PI-502 on baw1/amc1/PI-502 (barg, json /value), stale after 2 min",
            "  key         NH3",
            "dry basis, mol%, sums to 100 ± 2 mol%, lag 1 min, stale after 15 min",
        ] {
            assert!(text.contains(needle), "summary lacks {needle:?}:\n{text}");
        }
    }

    #[test]
    fn broken_several_problems_at_once() {
        assert_problems(
            "several-problems.toml",
            &broken("several-problems.toml"),
            &[
                (
                    "site",
                    "\"baw 1\" may use only letters, digits, `-` and `_`",
                ),
                ("atmosphere", "\"1 barg\" is a gauge pressure"),
                (
                    "species_files[0]",
                    "no-such-species-file.toml: no such file",
                ),
                (
                    "reactors.\"lts 1\"",
                    "reactor id \"lts 1\" may use only letters, digits",
                ),
                (
                    "reactors.\"lts 1\".eos",
                    "unknown equation of state \"virial\"",
                ),
                (
                    "reactors.\"lts 1\".band",
                    "-1 must be a number zero or more",
                ),
                (
                    "reactors.\"lts 1\".transient",
                    "expected a rate such as \"2 K/min\"",
                ),
                (
                    "reactors.\"lts 1\".composition.sum_tolerance",
                    "\"150 mol%\" is outside 0 to 100 mol%",
                ),
                (
                    "reactors.\"lts 1\".composition.lag",
                    "\"fast\" is not a number followed by a unit",
                ),
                (
                    "reactors.\"lts 1\".composition.max_age",
                    "must be above zero",
                ),
                (
                    "reactors.\"lts 1\".temperature[0].decoder",
                    "unknown decoder \"xml\"",
                ),
                (
                    "reactors.\"lts 1\".temperature[0].topic",
                    "\"baw1/lts1/+\" contains a wildcard",
                ),
                (
                    "reactors.\"lts 1\".pressure.topic",
                    "is also reactors.\"lts 1\".composition.topic",
                ),
                (
                    "reactors.mth1.composition",
                    "give topic (one analyser message with every component) or topics",
                ),
                ("reactors.mth1.temperature", "no thermocouple"),
                (
                    "reactors.mth1.steam_ratio.value_pointer",
                    "only with decoder = \"json\"",
                ),
                (
                    "reactors.mth1.steam_ratio.topic",
                    "lies under eqwatch's own output prefix \"eqwatch/baw1\"",
                ),
            ],
        );
    }

    #[test]
    fn the_metrics_topic_is_off_by_default_and_takes_only_true_or_false() {
        use crate::config::test_support::{check, refused, with_broker};
        let base = with_broker("url = \"mqtt://127.0.0.1:1883\"");
        assert!(!check(&base).expect("valid").metrics_topic);
        let on = format!("metrics_topic = true\n{base}");
        assert!(check(&on).expect("valid").metrics_topic);
        // The text "yes" instead of the boolean (invented mistake): the key and its line.
        let e = refused(&format!("metrics_topic = \"yes\"\n{base}"));
        assert_problems(
            "metrics_topic as text",
            &e,
            &[(
                "metrics_topic",
                "expected true or false (no quotes) (line 1)",
            )],
        );
    }

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(128))]
        /// Any text, and the demo configuration with bytes changed at random: a list of
        /// problems or settings, never a panic.
        #[test]
        fn any_configuration_text_never_panics(
            junk in "\\PC{0,400}",
            edits in proptest::collection::vec((0usize..100_000, proptest::prelude::any::<u8>()), 1..12),
        ) {
            let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("config");
            let _ = super::from_str(&junk, &dir);
            let mut bytes = include_str!("../../config/demo-plant.toml").as_bytes().to_vec();
            for (at, b) in edits {
                let n = bytes.len();
                bytes[at % n] = b;
            }
            let _ = super::from_str(&String::from_utf8_lossy(&bytes), &dir);
        }
    }
}
