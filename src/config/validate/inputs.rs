//! A reactor's inputs: composition, scalar inputs (temperature, pressure, steam ratio), their
//! topics, decoders and JSON Pointers, units and tolerances.

use crate::monitor::spec::Plausible;
use std::time::Duration;

use crate::composition::Basis;
use crate::config::error::{Problems, key_path, unit_message};
use crate::config::raw::{RawComposition, RawScalar, RawSteamRatio};
use crate::config::settings::{
    CompositionSource, ScalarDecoder, ScalarSettings, SteamRatioSettings,
};
use crate::config::validate::{DurationRule, NANOSECOND, duration_at};
use crate::monitor::spec::{AnalysisSpec, Delivery};
use crate::thermo::reaction::unknown_hint;
use crate::thermo::species::SpeciesDb;
use crate::units::{
    CompositionUnit, PressureUnit, STANDARD_ATMOSPHERE_BAR, ScalarUnit, TemperatureUnit,
    split_quantity,
};

/// Checks a JSON Pointer (RFC 6901 §3). `optional`: `""` means "not read" and gives
/// `None`; otherwise `""` is the whole document.
fn pointer(
    problems: &mut Problems,
    path: String,
    given: Option<&str>,
    default: &str,
    optional: bool,
) -> Option<String> {
    let text = given.unwrap_or(default);
    if optional && text.is_empty() {
        return None;
    }
    if !text.is_empty() && !text.starts_with('/') {
        problems.add(
            path,
            format!("\"{text}\" is not a JSON Pointer (RFC 6901); it starts with `/`, e.g. \"{default}\""),
        );
        return Some(default.to_string());
    }
    let bad_escape = text
        .match_indices('~')
        .any(|(i, _)| !matches!(text.as_bytes().get(i + 1), Some(b'0' | b'1')));
    if bad_escape {
        problems.add(
            path,
            format!("\"{text}\": `~` must be written ~0, and `/` inside a name ~1 (RFC 6901)"),
        );
    }
    Some(text.to_string())
}

/// The pointer keys of a scalar message, by name, for messages about them.
struct PointerKeys<'a> {
    value: Option<&'a str>,
    ts: Option<&'a str>,
    quality: Option<&'a str>,
    unit: Option<&'a str>,
}

fn decoder(
    problems: &mut Problems,
    path: &str,
    name: Option<&str>,
    keys: PointerKeys,
) -> ScalarDecoder {
    let name = name.unwrap_or("json").trim().to_ascii_lowercase();
    match name.as_str() {
        "json" => ScalarDecoder::Json {
            value_pointer: pointer(
                problems,
                format!("{path}.value_pointer"),
                keys.value,
                "/value",
                false,
            )
            .unwrap_or_else(|| "/value".to_string()),
            ts_pointer: pointer(problems, format!("{path}.ts_pointer"), keys.ts, "/ts", true),
            quality_pointer: pointer(
                problems,
                format!("{path}.quality_pointer"),
                keys.quality,
                "/quality",
                true,
            ),
            unit_pointer: pointer(
                problems,
                format!("{path}.unit_pointer"),
                keys.unit,
                "/unit",
                true,
            ),
        },
        "number" => {
            for (key, given) in [
                ("value_pointer", keys.value),
                ("ts_pointer", keys.ts),
                ("quality_pointer", keys.quality),
                ("unit_pointer", keys.unit),
            ] {
                if given.is_some() {
                    problems.add(
                        format!("{path}.{key}"),
                        "only with decoder = \"json\"; a \"number\" payload is the bare value",
                    );
                }
            }
            ScalarDecoder::Number
        }
        _ => {
            problems.add(
                format!("{path}.decoder"),
                format!("unknown decoder \"{name}\"; expected \"json\" or \"number\""),
            );
            ScalarDecoder::Number
        }
    }
}

#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum ScalarKind {
    Temperature,
    Pressure,
    Ratio,
    Flow,
}

/// The keys of one scalar input, from a temperature, pressure or steam-ratio table.
pub(crate) struct ScalarFields<'a> {
    tag: Option<&'a str>,
    topic: Option<&'a str>,
    decoder: Option<&'a str>,
    pointers: PointerKeys<'a>,
    unit: Option<&'a str>,
    max_age: Option<&'a str>,
    plausible: Option<[f64; 2]>,
}

/// The shared scalar keys of each table made by `scalar_table!` (config/raw.rs).
macro_rules! scalar_fields_from {
    ($($t:ty),*) => {$(
        impl<'a> From<&'a $t> for ScalarFields<'a> {
            fn from(r: &'a $t) -> Self {
                Self {
                    tag: r.tag.as_deref(),
                    topic: r.topic.as_deref(),
                    decoder: r.decoder.as_deref(),
                    pointers: PointerKeys {
                        value: r.value_pointer.as_deref(),
                        ts: r.ts_pointer.as_deref(),
                        quality: r.quality_pointer.as_deref(),
                        unit: r.unit_pointer.as_deref(),
                    },
                    unit: r.unit.as_deref(),
                    max_age: r.max_age.as_deref(),
                    plausible: r.plausible,
                }
            }
        }
    )*};
}

scalar_fields_from!(
    RawScalar,
    crate::config::raw::RawBedThermocouple,
    crate::config::raw::RawFlow
);

impl<'a> From<&'a RawSteamRatio> for ScalarFields<'a> {
    fn from(r: &'a RawSteamRatio) -> Self {
        Self {
            tag: r.tag.as_deref(),
            topic: r.topic.as_deref(),
            decoder: r.decoder.as_deref(),
            pointers: PointerKeys {
                value: r.value_pointer.as_deref(),
                ts: r.ts_pointer.as_deref(),
                quality: r.quality_pointer.as_deref(),
                unit: r.unit_pointer.as_deref(),
            },
            unit: None,
            max_age: r.max_age.as_deref(),
            plausible: r.plausible,
        }
    }
}

pub(crate) fn scalar(
    problems: &mut Problems,
    path: &str,
    f: ScalarFields,
    kind: ScalarKind,
) -> ScalarSettings {
    let topic = match f.topic {
        Some(t) => t.to_string(),
        None => {
            problems.add(
                format!("{path}.topic"),
                "missing; give the topic the instrument publishes to",
            );
            String::new()
        }
    };
    let tag = match f.tag {
        Some(t) if t.trim().is_empty() => {
            problems.add(format!("{path}.tag"), "is empty; give the instrument tag");
            String::new()
        }
        Some(t) => t.trim().to_string(),
        None => topic.clone(),
    };
    let decoder = decoder(problems, path, f.decoder, f.pointers);
    let unit_path = format!("{path}.unit");
    let unit = match (kind, f.unit) {
        (ScalarKind::Temperature, None) => {
            problems.add(
                unit_path,
                "missing; give the unit the instrument sends, e.g. \"degC\" or \"K\"",
            );
            ScalarUnit::Temperature(TemperatureUnit::Kelvin)
        }
        (ScalarKind::Temperature, Some(u)) => match TemperatureUnit::parse(u) {
            Ok(t) => ScalarUnit::Temperature(t),
            Err(e) => {
                problems.add(unit_path, unit_message(&e));
                ScalarUnit::Temperature(TemperatureUnit::Kelvin)
            }
        },
        (ScalarKind::Pressure, None) => {
            problems.add(
                unit_path,
                "missing; give the unit with its reference, e.g. \"barg\" (gauge) or \"bara\" (absolute)",
            );
            ScalarUnit::Pressure(PressureUnit {
                bar_per_unit: 1.0,
                gauge: false,
            })
        }
        (ScalarKind::Pressure, Some(u)) => match PressureUnit::parse(u) {
            Ok(pu) => ScalarUnit::Pressure(pu),
            Err(e) => {
                problems.add(unit_path, unit_message(&e));
                ScalarUnit::Pressure(PressureUnit {
                    bar_per_unit: 1.0,
                    gauge: false,
                })
            }
        },
        (ScalarKind::Ratio, _) => ScalarUnit::Ratio,
        (ScalarKind::Flow, None) => {
            problems.add(
                unit_path,
                "missing; give the unit the meter sends, e.g. \"kmol/h\" or \"Nm3/h\"",
            );
            ScalarUnit::Flow(crate::units::FlowUnit::KMOL_H)
        }
        (ScalarKind::Flow, Some(u)) => match crate::units::FlowUnit::parse(u) {
            Ok(f) => ScalarUnit::Flow(f),
            Err(e) => {
                problems.add(unit_path, unit_message(&e));
                ScalarUnit::Flow(crate::units::FlowUnit::KMOL_H)
            }
        },
    };
    let max_age = duration_at(
        problems,
        &format!("{path}.max_age"),
        f.max_age,
        DurationRule {
            default: None,
            min: NANOSECOND,
            why_min: "a reading is stale after this",
        },
    );
    let plausible = plausible_range(problems, &format!("{path}.plausible"), f.plausible, &unit);
    ScalarSettings {
        tag,
        topic,
        decoder,
        unit,
        max_age,
        plausible,
    }
}

/// The plausible range of an input: `[low, high]` in its configured unit, converted to
/// K, bar absolute (gauge ends at the standard atmosphere; a plausibility bound needs
/// no better) or mol/mol; by default [`Plausible::default_for`] the unit's kind.
fn plausible_range(
    problems: &mut Problems,
    path: &str,
    given: Option<[f64; 2]>,
    unit: &ScalarUnit,
) -> Plausible {
    let default = Plausible::default_for(unit);
    let Some([low, high]) = given else {
        return default;
    };
    let convert = |v: f64| match unit {
        ScalarUnit::Temperature(t) => t.to_kelvin(v).map_err(|e| e.to_string()),
        ScalarUnit::Pressure(p) => p
            .to_bar_absolute(v, STANDARD_ATMOSPHERE_BAR)
            .map_err(|e| e.to_string()),
        ScalarUnit::Ratio if v >= 0.0 && v.is_finite() => Ok(v),
        ScalarUnit::Ratio => Err(format!("{v} is not a ratio (0 or more)")),
        ScalarUnit::Flow(f) => f.to_kmol_h(v).map_err(|e| e.to_string()),
    };
    match (convert(low), convert(high)) {
        (Ok(min), Ok(max)) if min < max => Plausible { min, max },
        (Ok(_), Ok(_)) => {
            problems.add(
                path.to_string(),
                format!("[{low}, {high}]: the low end must be below the high end"),
            );
            default
        }
        (Err(e), _) | (_, Err(e)) => {
            problems.add(path.to_string(), format!("[{low}, {high}]: {e}"));
            default
        }
    }
}

/// The longest common `/`-separated prefix of some topics (a default tag).
fn common_topic_prefix<'a>(topics: impl Iterator<Item = &'a str>) -> String {
    let mut prefix: Option<Vec<&str>> = None;
    for t in topics {
        let levels: Vec<&str> = t.split('/').collect();
        prefix = Some(match prefix {
            None => levels,
            Some(p) => p
                .iter()
                .zip(&levels)
                .take_while(|(a, b)| a == b)
                .map(|(a, _)| *a)
                .collect(),
        });
    }
    prefix.unwrap_or_default().join("/")
}

pub(crate) fn composition(
    problems: &mut Problems,
    db: &SpeciesDb,
    table_path: &str,
    raw: &RawComposition,
    basis: Option<Basis>,
) -> Option<(AnalysisSpec, CompositionSource, Vec<usize>)> {
    let path = table_path.to_string();
    let start = problems.len();
    let unit = match raw.unit.as_deref() {
        None => CompositionUnit::Percent,
        Some(u) => CompositionUnit::parse(u).unwrap_or_else(|e| {
            problems.add(format!("{path}.unit"), unit_message(&e));
            CompositionUnit::Percent
        }),
    };
    let comps = components(problems, db, &path, raw, basis);
    let source = analysis_source(problems, db, &path, raw, &comps);
    let Components { species, names } = comps;
    let tag = match (&raw.tag, &source) {
        (Some(t), _) if t.trim().is_empty() => {
            problems.add(format!("{path}.tag"), "is empty; give the analyser tag");
            String::new()
        }
        (Some(t), _) => t.trim().to_string(),
        (None, Some(CompositionSource::Analyser { topic, .. })) => topic.clone(),
        (None, Some(CompositionSource::PerComponent { topics, .. })) => {
            common_topic_prefix(topics.iter().map(|(_, t)| t.as_str()))
        }
        (None, None) => String::new(),
    };
    let sum_tolerance = match raw.sum_tolerance.as_deref() {
        None => 0.02,
        Some(text) => sum_tolerance(problems, &format!("{path}.sum_tolerance"), text),
    };
    let lag = duration_at(
        problems,
        &format!("{path}.lag"),
        raw.lag.as_deref(),
        DurationRule {
            default: Some(Duration::ZERO),
            min: Duration::ZERO,
            why_min: "",
        },
    );
    if lag > MAX_LAG {
        problems.add(
            format!("{path}.lag"),
            format!(
                "{} h is longer than any analyser lag ({} h at most: sample line, conditioning and GC cycle take minutes); check the unit",
                lag.as_secs() / 3600,
                MAX_LAG.as_secs() / 3600
            ),
        );
    }
    let max_age = duration_at(
        problems,
        &format!("{path}.max_age"),
        raw.max_age.as_deref(),
        DurationRule {
            default: None,
            min: NANOSECOND,
            why_min: "an analysis is stale after this",
        },
    );
    let detection_limits = detection_limits(problems, &path, raw, &names);
    let (Some(source), Some(basis)) = (source, basis) else {
        return None;
    };
    if problems.len() > start {
        return None;
    }
    let delivery = match source {
        CompositionSource::Analyser { .. } => Delivery::Whole,
        CompositionSource::PerComponent { .. } => Delivery::PerComponent,
    };
    Some((
        AnalysisSpec {
            tag,
            delivery,
            unit,
            basis,
            components: names,
            sum_tolerance,
            lag,
            max_age,
            detection_limits,
        },
        source,
        species,
    ))
}

/// The species an analyser reports, and their names as in the species data.
struct Components {
    species: Vec<usize>,
    names: Vec<String>,
}

/// `components`: known species, each once, no water on a dry basis.
fn components(
    problems: &mut Problems,
    db: &SpeciesDb,
    path: &str,
    raw: &RawComposition,
    basis: Option<Basis>,
) -> Components {
    let water = db.index_of("H2O");
    let mut species: Vec<usize> = Vec::new();
    if raw.components.is_empty() {
        problems.add(
            format!("{path}.components"),
            "no components; list the species the analyser reports, e.g. [\"H2\", \"N2\", \"CO\"]",
        );
    }
    for (i, c) in raw.components.iter().enumerate() {
        let ipath = format!("{path}.components[{i}]");
        match db.index_of(c.trim()) {
            None => problems.add(
                ipath,
                format!("unknown species \"{c}\"{}", unknown_hint(db, c.trim())),
            ),
            Some(s) if species.contains(&s) => {
                problems.add(ipath, format!("{} is listed twice", db.get(s).name));
            }
            Some(s) => {
                if basis == Some(Basis::Dry) && Some(s) == water {
                    problems.add(
                        ipath,
                        "H2O on a dry-basis analysis; a dry analyser sees the gas after its water is knocked out: remove H2O and give the water as steam_ratio",
                    );
                }
                species.push(s);
            }
        }
    }
    let names: Vec<String> = species.iter().map(|&s| db.get(s).name.clone()).collect();
    Components { species, names }
}

/// The JSON Pointers of a per-component (scalar) message.
fn scalar_keys(raw: &RawComposition) -> PointerKeys<'_> {
    PointerKeys {
        value: raw.value_pointer.as_deref(),
        ts: raw.ts_pointer.as_deref(),
        quality: raw.quality_pointer.as_deref(),
        unit: raw.unit_pointer.as_deref(),
    }
}

/// Where the analysis comes from: one analyser message (`topic`) or one topic per component
/// (`topics`), exactly one of them.
fn analysis_source(
    problems: &mut Problems,
    db: &SpeciesDb,
    path: &str,
    raw: &RawComposition,
    comps: &Components,
) -> Option<CompositionSource> {
    let path = path.to_string();
    match (&raw.topic, &raw.topics) {
        (Some(_), Some(_)) => {
            problems.add(
                path.clone(),
                "give topic (one analyser message with every component) or topics (one topic per component), not both",
            );
            None
        }
        (None, None) => {
            problems.add(
                format!("{path}.topic"),
                "missing; give topic = \"...\" (one message with every component) or topics = { H2 = \"...\", ... } (one per component)",
            );
            None
        }
        (Some(topic), None) => Some(analyser_source(problems, &path, raw, topic)),
        (None, Some(_)) => Some(per_component_source(problems, db, &path, raw, comps)),
    }
}

/// One analyser message with every component, and its JSON Pointers.
fn analyser_source(
    problems: &mut Problems,
    path: &str,
    raw: &RawComposition,
    topic: &str,
) -> CompositionSource {
    let scalar_keys = scalar_keys(raw);
    for (key, given) in [
        ("decoder", &raw.decoder),
        ("value_pointer", &raw.value_pointer),
    ] {
        if given.is_some() {
            problems.add(
                format!("{path}.{key}"),
                "only with topics (one topic per component); an analyser message is JSON with values_pointer",
            );
        }
    }
    if topic.starts_with(crate::config::SpbRef::PREFIX) {
        problems.add(
            format!("{path}.topic"),
            "a Sparkplug metric carries one value: give one spb: reference per component under topics",
        );
    }
    CompositionSource::Analyser {
        topic: topic.to_string(),
        values_pointer: pointer(
            problems,
            format!("{path}.values_pointer"),
            raw.values_pointer.as_deref(),
            "/values",
            false,
        )
        .unwrap_or_else(|| "/values".to_string()),
        ts_pointer: pointer(
            problems,
            format!("{path}.ts_pointer"),
            scalar_keys.ts,
            "/ts",
            true,
        ),
        unit_pointer: pointer(
            problems,
            format!("{path}.unit_pointer"),
            scalar_keys.unit,
            "/unit",
            true,
        ),
        basis_pointer: pointer(
            problems,
            format!("{path}.basis_pointer"),
            raw.basis_pointer.as_deref(),
            "/basis",
            true,
        ),
        quality_pointer: pointer(
            problems,
            format!("{path}.quality_pointer"),
            scalar_keys.quality,
            "/quality",
            true,
        ),
    }
}

/// One topic per component, each component with its topic, and their decoder.
fn per_component_source(
    problems: &mut Problems,
    db: &SpeciesDb,
    path: &str,
    raw: &RawComposition,
    comps: &Components,
) -> CompositionSource {
    let (species, names) = (&comps.species, &comps.names);
    let scalar_keys = scalar_keys(raw);
    for (key, given) in [
        ("values_pointer", &raw.values_pointer),
        ("basis_pointer", &raw.basis_pointer),
    ] {
        if given.is_some() {
            problems.add(
                format!("{path}.{key}"),
                "only with topic (one analyser message with every component)",
            );
        }
    }
    let decoder = decoder(problems, path, raw.decoder.as_deref(), scalar_keys);
    let mut by_species: Vec<(usize, &String)> = Vec::new();
    for (name, topic) in raw.topics.iter().flatten() {
        let kpath = key_path(&format!("{path}.topics"), name);
        match db.index_of(name.trim()) {
            None => problems.add(
                kpath,
                format!(
                    "unknown species \"{name}\"{}",
                    unknown_hint(db, name.trim())
                ),
            ),
            Some(s) if by_species.iter().any(|(x, _)| *x == s) => {
                problems.add(kpath, format!("{} has two topics", db.get(s).name));
            }
            Some(s) if !species.contains(&s) => problems.add(
                kpath,
                format!(
                    "{} is not in {path}.components; add it there or remove its topic",
                    db.get(s).name
                ),
            ),
            Some(s) => by_species.push((s, topic)),
        }
    }
    let mut topics = Vec::with_capacity(species.len());
    for (&s, name) in species.iter().zip(names) {
        match by_species.iter().find(|(x, _)| *x == s) {
            Some((_, t)) => topics.push((name.clone(), (*t).clone())),
            None => problems.add(
                format!("{path}.topics"),
                format!("no topic for {name}; every component needs one"),
            ),
        }
    }
    CompositionSource::PerComponent { topics, decoder }
}

/// `detection_limits`: per component, above zero and below 100 mol%.
fn detection_limits(
    problems: &mut Problems,
    path: &str,
    raw: &RawComposition,
    names: &[String],
) -> Vec<Option<f64>> {
    let mut detection_limits = vec![None; names.len()];
    for (sp, text) in raw.detection_limits.iter().flatten() {
        let key = key_path(&format!("{path}.detection_limits"), sp);
        let Some(i) = names.iter().position(|n| n.eq_ignore_ascii_case(sp.trim())) else {
            problems.add(
                key,
                format!(
                    "\"{sp}\" is not one of this analyser's components ({})",
                    names.join(", ")
                ),
            );
            continue;
        };
        match composition_amount("detection limit", text) {
            Ok(f) if f > 0.0 && f < 1.0 => detection_limits[i] = Some(f),
            Ok(_) => problems.add(
                key,
                format!("\"{text}\" must be above zero and below 100 mol%"),
            ),
            Err(m) => problems.add(key, m),
        }
    }
    detection_limits
}

/// An amount of a component such as `"2 mol%"` or `"0.5 ppm"`, as a mole fraction.
pub(crate) fn composition_amount(what: &'static str, text: &str) -> Result<f64, String> {
    split_quantity(what, text)
        .map_err(|e| e.to_string())
        .and_then(|(v, unit)| {
            if unit.is_empty() {
                return Err(format!(
                    "\"{text}\" has no unit; write e.g. \"2 mol%\" or \"0.5 ppm\""
                ));
            }
            let u = CompositionUnit::parse(unit).map_err(|e| unit_message(&e))?;
            Ok(v * u.fraction_per_unit())
        })
}

pub(crate) fn sum_tolerance(problems: &mut Problems, path: &str, text: &str) -> f64 {
    let parsed = composition_amount("sum tolerance", text);
    match parsed {
        Ok(f) if (0.0..1.0).contains(&f) => f,
        Ok(_) => {
            problems.add(path, format!("\"{text}\" is outside 0 to 100 mol%"));
            0.02
        }
        Err(m) => {
            problems.add(path, m);
            0.02
        }
    }
}

/// Kelvin per degree of a temperature difference unit.
/// The longest analyser lag a configuration may give [docs/domain.md §5: 30–60 s for a
/// well-built system, 5–15 min for a poor one; 2 h leaves room for any real one].
const MAX_LAG: Duration = Duration::from_secs(2 * 3600);

pub(crate) fn kelvin_per_degree(unit: &str) -> Option<f64> {
    match unit.trim().to_ascii_lowercase().as_str() {
        "k" | "degc" | "°c" | "c" => Some(1.0),
        "degf" | "°f" | "f" | "degr" | "°r" => Some(5.0 / 9.0),
        _ => None,
    }
}

pub(crate) fn transient(problems: &mut Problems, path: &str, text: &str) -> f64 {
    let expected = "expected a rate such as \"2 K/min\" (K, degC or degF per s, min or h)";
    let rate = split_quantity("transient", text)
        .ok()
        .and_then(|(v, unit)| {
            let (deg, time) = unit.split_once('/')?;
            let per_min = match time.trim().to_ascii_lowercase().as_str() {
                "s" | "sec" => 60.0,
                "min" => 1.0,
                "h" | "hr" => 1.0 / 60.0,
                _ => return None,
            };
            Some(v * kelvin_per_degree(deg)? * per_min)
        });
    match rate {
        Some(r) if r > 0.0 && r.is_finite() => r,
        Some(_) => {
            problems.add(path, format!("\"{text}\" must be above zero"));
            2.0
        }
        None => {
            problems.add(path, format!("\"{text}\": {expected}"));
            2.0
        }
    }
}

pub(crate) fn check_topic(problems: &mut Problems, path: &str, topic: &str, output_prefix: &str) {
    if let Some(r) = crate::config::SpbRef::parse(topic) {
        match r {
            Ok(r) if r.key() != topic => {
                problems.add(path, format!("\"{topic}\": write it as \"{}\"", r.key()))
            }
            Ok(_) => {}
            Err(e) => problems.add(path, e),
        }
        return;
    }
    if topic.is_empty() {
        problems.add(path, "is empty; give the topic the instrument publishes to");
    } else if topic.contains(['+', '#']) {
        problems.add(
            path,
            format!(
                "\"{topic}\" contains a wildcard (`+` or `#`); give the one topic this input is published on"
            ),
        );
    } else if topic.contains('\0') {
        problems.add(path, "contains a NUL character");
    } else if topic.len() > 65_535 {
        problems.add(path, "is longer than MQTT allows (65535 bytes)");
    } else if topic.trim() != topic {
        problems.add(
            path,
            format!("\"{topic}\" starts or ends with a space; remove it"),
        );
    } else if topic == output_prefix
        || topic
            .strip_prefix(output_prefix)
            .is_some_and(|rest| rest.starts_with('/'))
    {
        problems.add(
            path,
            format!(
                "\"{topic}\" lies under eqwatch's own output prefix \"{output_prefix}\"; eqwatch would read its own results"
            ),
        );
    }
}

pub(crate) fn steam_ratio(
    problems: &mut Problems,
    path: &str,
    raw: &RawSteamRatio,
) -> Option<SteamRatioSettings> {
    match (raw.value, &raw.topic) {
        (Some(_), Some(_)) => {
            problems.add(
                path,
                "give value (a fixed ratio) or topic (a measured one), not both",
            );
            None
        }
        (Some(v), None) => {
            for (key, given) in [
                ("tag", raw.tag.is_some()),
                ("decoder", raw.decoder.is_some()),
                ("value_pointer", raw.value_pointer.is_some()),
                ("ts_pointer", raw.ts_pointer.is_some()),
                ("quality_pointer", raw.quality_pointer.is_some()),
                ("unit_pointer", raw.unit_pointer.is_some()),
                ("max_age", raw.max_age.is_some()),
            ] {
                if given {
                    problems.add(
                        format!("{path}.{key}"),
                        "only for a measured steam ratio (with topic); a fixed value needs none",
                    );
                }
            }
            if v.is_finite() && v > 0.0 {
                Some(SteamRatioSettings::Fixed(v))
            } else {
                problems.add(
                    format!("{path}.value"),
                    format!("{v} must be above zero (mol H2O per mol dry gas)"),
                );
                None
            }
        }
        (None, Some(_)) => Some(SteamRatioSettings::Measured(scalar(
            problems,
            path,
            raw.into(),
            ScalarKind::Ratio,
        ))),
        (None, None) => {
            problems.add(
                path,
                "give value = 0.5 (a fixed ratio) or topic = \"...\" (a measured one)",
            );
            None
        }
    }
}

// ---------------------------------------------------------------------------
// Plant summary

#[cfg(test)]
mod tests {
    //! Check values: see `test_support` (the demo plant's own data, else invented).

    use crate::config::settings::{CompositionSource, ScalarDecoder};
    use crate::config::test_support::{assert_problems, broken, check, refused, with_broker};
    use crate::units::CompositionUnit;
    use std::time::Duration;

    #[test]
    fn plausible_ranges_are_read_in_the_inputs_unit_or_defaulted() {
        let demo = include_str!("../../../config/demo-plant.toml");
        let s = check(demo).expect("demo");
        let lts = &s
            .reactors
            .iter()
            .find(|r| r.spec.id == "lts1")
            .expect("lts1")
            .spec;
        // Defaults (Plausible::default_for): 250-1600 K, 0.5-400 bar abs.
        assert_eq!(
            (
                lts.temperatures[0].plausible.min,
                lts.temperatures[0].plausible.max
            ),
            (250.0, 1600.0)
        );
        assert_eq!(
            (lts.pressure.plausible.min, lts.pressure.plausible.max),
            (0.5, 400.0)
        );
        // Given in degC and barg: 0 degC = 273.15 K; 0 barg = 1.01325 bar abs (NIST SP 811).
        let text = demo
            .replacen(
                "tag = \"BAW1-TI-305A\"",
                "tag = \"BAW1-TI-305A\"\nplausible = [150, 300]",
                1,
            )
            .replacen(
                "tag = \"BAW1-PI-302\"",
                "tag = \"BAW1-PI-302\"\nplausible = [20, 40]",
                1,
            );
        let s = check(&text).expect("with ranges");
        let lts = &s
            .reactors
            .iter()
            .find(|r| r.spec.id == "lts1")
            .expect("lts1")
            .spec;
        let t = lts.temperatures[0].plausible;
        assert!(
            (t.min - 423.15).abs() < 1e-9 && (t.max - 573.15).abs() < 1e-9,
            "{t:?}"
        );
        let p = lts.pressure.plausible;
        assert!(
            (p.min - 21.01325).abs() < 1e-9 && (p.max - 41.01325).abs() < 1e-9,
            "{p:?}"
        );
        let e = refused(&demo.replacen(
            "tag = \"BAW1-PI-302\"",
            "tag = \"BAW1-PI-302\"\nplausible = [40, 20]",
            1,
        ));
        assert!(
            e.to_string().contains("reactors.lts1.pressure.plausible"),
            "{e}"
        );
    }

    #[test]
    fn broken_unknown_units() {
        assert_problems(
            "unknown-unit.toml",
            &broken("unknown-unit.toml"),
            &[
                (
                    "reactors.lts1.composition.unit",
                    "unknown unit \"mol-%\"; expected one of fraction, mol%",
                ),
                (
                    "reactors.lts1.temperature[0].unit",
                    "unknown unit \"degK\"; expected one of K, degC",
                ),
                (
                    "reactors.lts1.pressure.unit",
                    "unit \"psi\" is ambiguous; write psia for absolute or psig for gauge",
                ),
                (
                    "reactors.lts1.uncertainty.pressure",
                    "unit \"furlongs\" is not understood",
                ),
            ],
        );
    }

    #[test]
    fn broken_water_basis() {
        assert_problems(
            "dry-without-steam-ratio.toml",
            &broken("dry-without-steam-ratio.toml"),
            &[
                (
                    "reactors.hts1.steam_ratio",
                    "missing; a dry-basis analysis needs the steam-to-dry-gas ratio",
                ),
                (
                    "reactors.lts1.composition.components[6]",
                    "H2O on a dry-basis analysis",
                ),
                ("reactors.lts1.steam_ratio.value", "must be above zero"),
                (
                    "reactors.amc1.steam_ratio",
                    "only for basis = \"dry\"; a wet analysis already contains its water",
                ),
            ],
        );
    }

    #[test]
    fn json_pointers_are_checked() {
        // Invented config for the test.
        let text = with_broker("url = \"mqtt://127.0.0.1\"").replace(
            "unit = \"degC\"",
            "unit = \"degC\"\nvalue_pointer = \"value\"\nts_pointer = \"/a~2b\"\nquality_pointer = \"\"",
        );
        let e = refused(&text);
        assert_problems(
            "pointers",
            &e,
            &[
                (
                    "reactors.hts1.temperature[0].value_pointer",
                    "is not a JSON Pointer (RFC 6901)",
                ),
                (
                    "reactors.hts1.temperature[0].ts_pointer",
                    "`~` must be written ~0",
                ),
            ],
        );
        let text = with_broker("url = \"mqtt://127.0.0.1\"").replace(
            "unit = \"degC\"",
            "unit = \"degC\"\nvalue_pointer = \"/data/0/v\"\nts_pointer = \"\"\nquality_pointer = \"/q~1flag\"",
        );
        let s = check(&text).unwrap();
        assert_eq!(
            s.reactors[0].wiring.temperatures[0].decoder,
            ScalarDecoder::Json {
                value_pointer: "/data/0/v".into(),
                ts_pointer: None,
                quality_pointer: Some("/q~1flag".into()),
                unit_pointer: Some("/unit".into()),
            }
        );
    }

    #[test]
    fn per_component_number_decoder_and_defaults() {
        // Invented config for the test: bare-number messages per component.
        let text = with_broker("url = \"mqtt://127.0.0.1\"").replace(
            "topic = \"baw1/hts1/AI-201\"",
            r#"topics = { H2 = "baw1/hts1/AI-201/H2", n2 = "baw1/hts1/AI-201/N2", CO = "baw1/hts1/AI-201/CO", CO2 = "baw1/hts1/AI-201/CO2", CH4 = "baw1/hts1/AI-201/CH4", Ar = "baw1/hts1/AI-201/Ar" }
    decoder = "number"
    unit = "ppm"
    lag = "2 min"
    sum_tolerance = "0.5 %""#,
        );
        let s = check(&text).unwrap();
        let c = &s.reactors[0].spec.composition;
        assert_eq!(
            c.tag, "baw1/hts1/AI-201",
            "default tag: the topics' common prefix"
        );
        assert_eq!(c.unit, CompositionUnit::Ppm);
        assert_eq!(c.lag, Duration::from_secs(120));
        assert!((c.sum_tolerance - 0.005).abs() < 1e-15);
        match &s.reactors[0].wiring.composition {
            CompositionSource::PerComponent { topics, decoder } => {
                assert_eq!(*decoder, ScalarDecoder::Number);
                assert_eq!(
                    topics[1],
                    ("N2".to_string(), "baw1/hts1/AI-201/N2".to_string())
                );
            }
            other => panic!("{other:?}"),
        }
        assert_eq!(s.reactors[0].spec.name, "hts1", "default name: the id");
        assert_eq!(
            s.reactors[0].spec.pressure.tag, "baw1/hts1/PI-202",
            "default tag: the topic"
        );
    }
}
