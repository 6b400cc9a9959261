//! One reactor: reactions, K(T) sources, uncertainty, the equilibrium system, bed rise, and
//! the reactor model built from them.

use crate::approach::{DEFAULT_BAND_LN, ModelError, ReactorModel, Uncertainty};
use crate::composition::Basis;
use crate::config::error::{Problems, is_name_char, key_path};
use crate::config::raw::{RawBedRise, RawReactor, RawUncertainty};
use crate::config::settings::{ReactorSettings, ScalarSettings, SteamRatioSettings, Wiring};
use crate::config::validate::inputs::{
    ScalarKind, check_topic, composition, composition_amount, kelvin_per_degree, scalar,
    steam_ratio, transient,
};
use crate::equilibrium::{EosKind, EquilibriumError, EquilibriumSystem};
use crate::monitor::spec::{AnalysisSpec, BedRiseSpec, ReactorSpec};
use crate::monitor::watch::WatchSettings;
use crate::thermo::ksource::{KModel, KSourceId};
use crate::thermo::reaction::{Reaction, parse_reaction, unknown_hint};
use crate::thermo::species::SpeciesDb;
use crate::units::{PressureUnit, UnitError, split_quantity};

/// Outlet thermocouples of one reactor further apart than this disagree [common
/// practice: two sound thermocouples in one outlet pipe agree within a few K; 15 K is
/// beyond any real gradient there].
const DEFAULT_MAX_SPREAD_K: f64 = 15.0;

pub(crate) fn uncertainty(
    problems: &mut Problems,
    path: &str,
    raw: Option<&RawUncertainty>,
) -> Uncertainty {
    let mut u = Uncertainty::default();
    let Some(raw) = raw else {
        return u;
    };
    let mut item = |key: &str,
                    text: &Option<String>,
                    convert: &dyn Fn(&str) -> Option<f64>,
                    example: &str|
     -> f64 {
        let Some(text) = text else {
            return 0.0;
        };
        let kpath = format!("{path}.{key}");
        match split_quantity("uncertainty", text) {
            Ok((v, unit)) if v >= 0.0 => match convert(unit) {
                Some(factor) => v * factor,
                None => {
                    problems.add(
                        kpath,
                        format!("\"{text}\": unit \"{unit}\" is not understood; write e.g. \"{example}\""),
                    );
                    0.0
                }
            },
            Ok(_) => {
                problems.add(
                    kpath,
                    format!("\"{text}\" is negative; a ± half-width is zero or more"),
                );
                0.0
            }
            Err(_) => {
                problems.add(
                    kpath,
                    format!("\"{text}\" is not a number with a unit; write e.g. \"{example}\""),
                );
                0.0
            }
        }
    };
    let pressure_bar_per_unit = |unit: &str| -> Option<f64> {
        // A difference: gauge and absolute units agree; `psi` alone is fine here.
        match PressureUnit::parse(unit) {
            Ok(pu) => Some(pu.bar_per_unit),
            Err(UnitError::Ambiguous { .. }) => PressureUnit::parse(&format!("{unit}a"))
                .ok()
                .map(|pu| pu.bar_per_unit),
            Err(_) => None,
        }
    };
    let percent = |unit: &str| (unit.trim() == "%").then_some(0.01);
    u.temperature_k = item("temperature", &raw.temperature, &kelvin_per_degree, "2 K");
    u.pressure_bar = item("pressure", &raw.pressure, &pressure_bar_per_unit, "0.2 bar");
    u.composition_rel = item("composition", &raw.composition, &percent, "2 %");
    u.steam_ratio_rel = item("steam_ratio", &raw.steam_ratio, &percent, "5 %");
    u
}

/// Default key component: the first reaction's single product where there is one
/// (NH3, CH3OH), else its first reactant as written (CH4 at a reformer, CO at a shift).
fn default_key(r: &Reaction) -> usize {
    let products: Vec<usize> = r
        .species
        .iter()
        .zip(&r.nu)
        .filter(|(_, nu)| **nu > 0.0)
        .map(|(s, _)| *s)
        .collect();
    match products.as_slice() {
        [one] => *one,
        _ => r.species.first().copied().unwrap_or_default(),
    }
}

fn model_error_path(reactor_path: &str, e: &ModelError) -> String {
    match e {
        ModelError::MissingSpecies { .. } => format!("{reactor_path}.composition.components"),
        ModelError::Eos(inner) => equilibrium_error_path(reactor_path, inner),
        ModelError::NoReaction => format!("{reactor_path}.reactions"),
    }
}

fn equilibrium_error_path(reactor_path: &str, e: &EquilibriumError) -> String {
    match e {
        EquilibriumError::NoCriticalConstants { .. } | EquilibriumError::Eos(_) => {
            format!("{reactor_path}.eos")
        }
        EquilibriumError::IncompleteReactions { .. }
        | EquilibriumError::DependentReactions { .. }
        | EquilibriumError::Empty => format!("{reactor_path}.reactions"),
    }
}

/// What every reactor is validated against: the species data, the prefix of eqwatch's own
/// topics (no input may use it) and the atmosphere for gauge pressures.
pub(crate) struct ReactorEnv<'a> {
    pub(crate) db: &'a SpeciesDb,
    pub(crate) output_prefix: &'a str,
    pub(crate) atmosphere_bar: f64,
    /// The plant-wide `[timestamps]` window.
    pub(crate) clock: crate::monitor::spec::ClockWindow,
}

/// The reactions of one reactor with their K sources; `ok` when every one was understood.
struct Reactions {
    list: Vec<(Reaction, KModel)>,
    ok: bool,
}

/// The reactor's model options.
struct ModelOptions {
    eos: EosKind,
    band_ln: f64,
}

/// Temperatures, pressure and steam ratio, as validated.
struct ScalarInputs {
    temperatures: Vec<ScalarSettings>,
    pressure: ScalarSettings,
    steam_ratio: Option<SteamRatioSettings>,
}

pub(crate) fn reactor(
    problems: &mut Problems,
    env: &ReactorEnv,
    id: &str,
    raw: &RawReactor,
) -> Option<ReactorSettings> {
    let db = env.db;
    let path = key_path("reactors", id);
    let start = problems.len();
    let name = reactor_name(problems, &path, id, raw);
    let reactions = reactions(problems, db, &path, raw);
    let options = model_options(problems, &path, raw);
    let transient_k_per_min = match raw.transient.as_deref() {
        None => 2.0,
        Some(t) => transient(problems, &format!("{path}.transient"), t),
    };
    let uncertainty = uncertainty(
        problems,
        &format!("{path}.uncertainty"),
        raw.uncertainty.as_ref(),
    );
    let basis = analysis_basis(problems, &path, raw);
    let composition = composition(
        problems,
        db,
        &format!("{path}.composition"),
        &raw.composition,
        basis,
    );
    let inputs = scalar_inputs(problems, &path, raw, basis);
    check_input_topics(problems, &path, raw, env.output_prefix);
    let key_component = key_component(problems, db, &path, raw, &reactions);

    // The gas and the models.
    let mut model = None;
    let mut equilibrium = None;
    if let (true, Some((comp, _, species))) = (reactions.ok, &composition)
        && let Some(gas) = gas_species(problems, db, &path, (comp, species), &reactions.list)
    {
        let inputs = ModelInputs {
            reactions: &reactions.list,
            gas: &gas,
            options: &options,
        };
        (model, equilibrium) = models(problems, db, &path, &inputs);
    }

    let mut watch = crate::config::validate::watch::watch(problems, &path, raw, env.atmosphere_bar);
    let bed_rise = raw.bed_rise.as_ref().and_then(|b| {
        bed_rise(
            problems,
            &format!("{path}.bed_rise"),
            b,
            &inputs.temperatures,
            &mut watch,
        )
    });
    let (flows, flow_sources) = crate::config::validate::context::flows(problems, &path, &raw.flow);
    if let Some(n) = &raw.normalise {
        crate::config::validate::context::normalise(
            problems,
            &format!("{path}.normalise"),
            raw,
            n,
            &mut watch,
        );
    }
    let (reconcile, inlet_source) = match crate::config::validate::context::reconcile(
        problems, db, &path, raw, basis, &mut watch,
    ) {
        Some((spec, source)) => (Some(spec), Some(source)),
        None => (None, None),
    };
    let bed_profile = raw.bed_profile.as_ref().and_then(|b| {
        crate::config::validate::bed::bed_profile(problems, &format!("{path}.bed_profile"), b)
    });
    if problems.len() > start {
        return None;
    }
    let (bed_profile, bed_sources) = match bed_profile {
        Some((spec, sources)) => {
            watch.drift.front_end_of_life_m = Some(spec.geometry.end_of_life_depth_m);
            (Some(spec), sources)
        }
        None => (None, Vec::new()),
    };
    let (
        Some((composition, composition_source, _)),
        Some(model),
        Some(equilibrium),
        Some(key_component),
    ) = (composition, model, equilibrium, key_component)
    else {
        return None;
    };
    let reaction_labels = model
        .reactions()
        .iter()
        .map(|t| t.reaction.canonical())
        .collect();
    let ScalarInputs {
        temperatures,
        pressure,
        steam_ratio,
    } = inputs;
    let (reactions, eos) = (reactions.list, options.eos);
    let (temperatures, temperature_sources): (Vec<_>, Vec<_>) =
        temperatures.into_iter().map(ScalarSettings::split).unzip();
    let (pressure, pressure_source) = pressure.split();
    let (steam_ratio, steam_ratio_source) = match steam_ratio.map(SteamRatioSettings::split) {
        Some((spec, source)) => (Some(spec), source),
        None => (None, None),
    };
    Some(ReactorSettings {
        spec: ReactorSpec {
            id: id.to_string(),
            name,
            reactions,
            eos,
            model,
            equilibrium,
            key_component,
            composition,
            temperatures,
            pressure,
            steam_ratio,
            uncertainty,
            transient_k_per_min,
            max_spread_k: DEFAULT_MAX_SPREAD_K,
            watch,
            reaction_labels,
            bed_rise,
            bed_profile,
            flows,
            reconcile,
            clock: env.clock,
        },
        wiring: Wiring {
            composition: composition_source,
            temperatures: temperature_sources,
            pressure: pressure_source,
            steam_ratio: steam_ratio_source,
            bed: bed_sources,
            flows: flow_sources,
            inlet_composition: inlet_source,
        },
    })
}

/// The reactor's name (its id when none is given); the id must be fit for topics.
fn reactor_name(problems: &mut Problems, path: &str, id: &str, raw: &RawReactor) -> String {
    let path = path.to_string();
    if id.is_empty() || !id.chars().all(is_name_char) {
        problems.add(
            path.clone(),
            format!("reactor id \"{id}\" may use only letters, digits, `-` and `_` (it goes into topics)"),
        );
    }
    match &raw.name {
        None => id.to_string(),
        Some(n) if n.trim().is_empty() => {
            problems.add(
                format!("{path}.name"),
                "is empty; give a readable name or remove the key",
            );
            String::new()
        }
        Some(n) => n.trim().to_string(),
    }
}

/// The reactions and their K sources.
fn reactions(problems: &mut Problems, db: &SpeciesDb, path: &str, raw: &RawReactor) -> Reactions {
    let reactions_start = problems.len();
    let mut reactions: Vec<(Reaction, KModel)> = Vec::with_capacity(raw.reactions.len());
    if raw.reactions.is_empty() {
        problems.add(
            format!("{path}.reactions"),
            "no reactions; give at least one, e.g. [{ equation = \"CO + H2O = CO2 + H2\" }]",
        );
    }
    for (i, r) in raw.reactions.iter().enumerate() {
        let rpath = format!("{path}.reactions[{i}]");
        let reaction = parse_reaction(&r.equation, db);
        let source = match r.k_source.as_deref() {
            None => Ok(KSourceId::SpeciesData),
            Some(s) => KSourceId::parse(s),
        };
        let source = source.map_err(|e| problems.add(format!("{rpath}.k_source"), e.to_string()));
        let reaction = match reaction {
            Ok(r) => r,
            Err(e) => {
                problems.add(format!("{rpath}.equation"), e.to_string());
                continue;
            }
        };
        let Ok(source) = source else {
            continue;
        };
        match KModel::from_correlation(source, &reaction, db) {
            Ok(k) => reactions.push((reaction, k)),
            Err(e) => problems.add(format!("{rpath}.k_source"), e.to_string()),
        }
    }
    Reactions {
        ok: problems.len() == reactions_start,
        list: reactions,
    }
}

/// The equation of state and the band of |ln(Q/K)| counted as at equilibrium.
fn model_options(problems: &mut Problems, path: &str, raw: &RawReactor) -> ModelOptions {
    let eos = match raw.eos.as_deref() {
        None => EosKind::Ideal,
        Some(s) => EosKind::parse(s).unwrap_or_else(|| {
            problems.add(
                format!("{path}.eos"),
                format!(
                    "unknown equation of state \"{s}\"; expected \"ideal\" or \"peng-robinson\""
                ),
            );
            EosKind::Ideal
        }),
    };
    let band_ln = match raw.band {
        None => DEFAULT_BAND_LN,
        Some(b) if b.is_finite() && b >= 0.0 => b,
        Some(b) => {
            problems.add(
                format!("{path}.band"),
                format!("{b} must be a number zero or more (a band of |ln(Q/K)|, e.g. 0.01)"),
            );
            DEFAULT_BAND_LN
        }
    };
    ModelOptions { eos, band_ln }
}

/// The analysis's basis, dry or wet (required).
fn analysis_basis(problems: &mut Problems, path: &str, raw: &RawReactor) -> Option<Basis> {
    let cpath = format!("{path}.composition");
    match raw.composition.basis.as_deref() {
        None => {
            problems.add(
                format!("{cpath}.basis"),
                "missing; give \"dry\" (water knocked out before the analyser) or \"wet\"",
            );
            None
        }
        Some(b) => {
            let parsed = Basis::parse(b);
            if parsed.is_none() {
                problems.add(
                    format!("{cpath}.basis"),
                    format!("unknown basis \"{b}\"; expected \"dry\" or \"wet\""),
                );
            }
            parsed
        }
    }
}

/// Temperatures (at least one), the pressure and, for a dry basis, the steam ratio.
fn scalar_inputs(
    problems: &mut Problems,
    path: &str,
    raw: &RawReactor,
    basis: Option<Basis>,
) -> ScalarInputs {
    if raw.temperature.is_empty() {
        problems.add(
            format!("{path}.temperature"),
            format!("no thermocouple; add at least one [[{path}.temperature]] table"),
        );
    }
    let temperatures: Vec<ScalarSettings> = raw
        .temperature
        .iter()
        .enumerate()
        .map(|(i, t)| {
            scalar(
                problems,
                &format!("{path}.temperature[{i}]"),
                t.into(),
                ScalarKind::Temperature,
            )
        })
        .collect();
    let pressure = scalar(
        problems,
        &format!("{path}.pressure"),
        (&raw.pressure).into(),
        ScalarKind::Pressure,
    );
    let spath = format!("{path}.steam_ratio");
    let steam_ratio = match (basis, &raw.steam_ratio) {
        (Some(Basis::Dry), None) => {
            problems.add(
                spath.clone(),
                "missing; a dry-basis analysis needs the steam-to-dry-gas ratio: value = 0.5 (fixed) or topic = \"...\" (measured)",
            );
            None
        }
        (Some(Basis::Wet), Some(_)) => {
            problems.add(
                spath.clone(),
                "only for basis = \"dry\"; a wet analysis already contains its water",
            );
            None
        }
        (Some(Basis::Dry), Some(s)) => steam_ratio(problems, &spath, s),
        _ => None,
    };
    ScalarInputs {
        temperatures,
        pressure,
        steam_ratio,
    }
}

/// Topics: valid, and no two inputs of this reactor on one topic.
fn check_input_topics(problems: &mut Problems, path: &str, raw: &RawReactor, output_prefix: &str) {
    let cpath = format!("{path}.composition");
    let spath = format!("{path}.steam_ratio");
    let mut topics: Vec<(String, &str)> = Vec::new();
    if let Some(t) = &raw.composition.topic {
        topics.push((format!("{cpath}.topic"), t));
    }
    for (name, t) in raw.composition.topics.iter().flatten() {
        topics.push((key_path(&format!("{cpath}.topics"), name), t));
    }
    for (i, t) in raw.temperature.iter().enumerate() {
        if let Some(t) = &t.topic {
            topics.push((format!("{path}.temperature[{i}].topic"), t));
        }
    }
    for (i, t) in raw
        .bed_profile
        .iter()
        .flat_map(|b| &b.thermocouple)
        .enumerate()
    {
        if let Some(t) = &t.topic {
            topics.push((format!("{path}.bed_profile.thermocouple[{i}].topic"), t));
        }
    }
    if let Some(t) = &raw.pressure.topic {
        topics.push((format!("{path}.pressure.topic"), t));
    }
    if let Some(t) = raw.steam_ratio.as_ref().and_then(|s| s.topic.as_ref()) {
        topics.push((format!("{spath}.topic"), t));
    }
    for (i, (tpath, topic)) in topics.iter().enumerate() {
        check_topic(problems, tpath, topic, output_prefix);
        if let Some((first, _)) = topics[..i].iter().find(|(_, t)| t == topic) {
            problems.add(
                tpath.clone(),
                format!("\"{topic}\" is also {first}; two inputs of one reactor need two topics"),
            );
        }
    }
}

/// The key component: the one given, else the reactions' default.
fn key_component(
    problems: &mut Problems,
    db: &SpeciesDb,
    path: &str,
    raw: &RawReactor,
    reactions: &Reactions,
) -> Option<usize> {
    let reactions_ok = reactions.ok;
    let reactions = &reactions.list;
    match (&raw.key_component, reactions.first()) {
        (Some(k), _) => match db.index_of(k.trim()) {
            None => {
                problems.add(
                    format!("{path}.key_component"),
                    format!("unknown species \"{k}\"{}", unknown_hint(db, k.trim())),
                );
                None
            }
            Some(s) if reactions_ok && !reactions.iter().any(|(r, _)| r.species.contains(&s)) => {
                problems.add(
                    format!("{path}.key_component"),
                    format!("{} is not a species of the reactions", db.get(s).name),
                );
                None
            }
            Some(s) => Some(s),
        },
        (None, Some((r, _))) => Some(default_key(r)),
        (None, None) => None,
    }
}

/// The gas the models see: the analysed species, plus water on a dry basis; `None` (with
/// problems) when a species of the reactions is not analysed.
fn gas_species(
    problems: &mut Problems,
    db: &SpeciesDb,
    path: &str,
    (comp, species): (&AnalysisSpec, &[usize]),
    reactions: &[(Reaction, KModel)],
) -> Option<Vec<usize>> {
    let cpath = format!("{path}.composition");
    let mut gas = species.to_vec();
    if comp.basis == Basis::Dry {
        match db.index_of("H2O") {
            Some(w) => gas.push(w),
            None => problems.add(
                format!("{cpath}.basis"),
                "a dry basis needs H2O in the species library",
            ),
        }
    }
    let before = problems.len();
    for (r, _) in reactions {
        for (s, n) in r.species.iter().zip(&r.names) {
            if !gas.contains(s) {
                let hint = if comp.basis == Basis::Wet && n == "H2O" {
                    " (a wet analysis reports its own water)"
                } else {
                    ""
                };
                problems.add(
                    format!("{cpath}.components"),
                    format!(
                        "{n}, a species of `{}`, is not analysed; add it{hint}",
                        r.text
                    ),
                );
            }
        }
    }
    (problems.len() == before).then_some(gas)
}

/// What the models are built from.
struct ModelInputs<'a> {
    reactions: &'a [(Reaction, KModel)],
    gas: &'a [usize],
    options: &'a ModelOptions,
}

/// The reactor model and the equilibrium system over the gas.
fn models(
    problems: &mut Problems,
    db: &SpeciesDb,
    path: &str,
    inputs: &ModelInputs,
) -> (Option<ReactorModel>, Option<EquilibriumSystem>) {
    let (reactions, gas) = (inputs.reactions, inputs.gas);
    let (eos, band_ln) = (inputs.options.eos, inputs.options.band_ln);
    let (mut model, mut equilibrium) = (None, None);
    match ReactorModel::new(db, reactions.to_vec(), gas, eos, None) {
        Ok(mut m) => {
            m.band_ln = band_ln;
            model = Some(m);
        }
        Err(e) => problems.add(model_error_path(path, &e), e.to_string()),
    }
    match EquilibriumSystem::from_reactions(db, reactions, gas, eos, None) {
        Ok(s) => equilibrium = Some(s),
        Err(e) => problems.add(equilibrium_error_path(path, &e), e.to_string()),
    }
    (model, equilibrium)
}

pub(crate) fn bed_rise(
    problems: &mut Problems,
    path: &str,
    raw: &RawBedRise,
    temperatures: &[ScalarSettings],
    watch: &mut WatchSettings,
) -> Option<BedRiseSpec> {
    let tag = raw.inlet_temperature.trim();
    let Some(inlet) = temperatures.iter().position(|t| t.tag == tag) else {
        let known: Vec<&str> = temperatures.iter().map(|t| t.tag.as_str()).collect();
        problems.add(
            format!("{path}.inlet_temperature"),
            format!(
                "\"{tag}\" is not the tag of one of this reactor's [[temperature]] entries ({})",
                known.join(", ")
            ),
        );
        return None;
    };
    if temperatures.len() < 2 {
        problems.add(
            format!("{path}.inlet_temperature"),
            "the reactor needs an outlet thermocouple besides the inlet one",
        );
        return None;
    }
    let mut co_co2 = (None, None);
    for (sp, text) in raw.inlet.iter().flatten() {
        let key = key_path(&format!("{path}.inlet"), sp);
        let slot = match sp.trim() {
            "CO" => &mut co_co2.0,
            "CO2" => &mut co_co2.1,
            other => {
                problems.add(key, format!("\"{other}\" is not CO or CO2"));
                continue;
            }
        };
        match composition_amount("inlet amount", text) {
            Ok(f) if (0.0..0.2).contains(&f) => *slot = Some(f),
            Ok(_) => problems.add(key, format!("\"{text}\" must be from 0 to 20 mol%")),
            Err(m) => problems.add(key, m),
        }
    }
    let inlet_co_co2 = match co_co2 {
        (None, None) => None,
        (co, co2) => Some((co.unwrap_or(0.0), co2.unwrap_or(0.0))),
    };
    if let Some(t) = &raw.alert_above_expected {
        let key = format!("{path}.alert_above_expected");
        if inlet_co_co2.is_none() {
            problems.add(
                key,
                "needs the inlet CO and CO2 (bed_rise.inlet) to know what to expect",
            );
        } else {
            match crate::config::validate::watch::kelvin(problems, &key, t) {
                Some(v) if v > 0.0 => watch.alerts.bed_rise_excess_k = Some(v),
                Some(v) => problems.add(key, format!("{v} K must be above zero")),
                None => {}
            }
        }
    }
    Some(BedRiseSpec {
        inlet,
        inlet_co_co2,
    })
}

#[cfg(test)]
mod tests {
    //! Check values: see `test_support` (the demo plant's own data, else invented).

    use crate::config::test_support::{
        assert_problems, broken, check, check_in, refused, with_broker,
    };

    use std::fs;

    #[test]
    fn broken_unknown_species() {
        assert_problems(
            "unknown-species.toml",
            &broken("unknown-species.toml"),
            &[
                (
                    "reactors.lts1.reactions[0].equation",
                    "unknown species `H20`; did you mean H2, H2O",
                ),
                (
                    "reactors.lts1.composition.components[3]",
                    "unknown species \"C02\"; did you mean CO2",
                ),
                ("reactors.lts1.key_component", "unknown species \"NH4\""),
                (
                    "reactors.mth1.composition.topics.NH3",
                    "NH3 is not in reactors.mth1.composition.components",
                ),
                ("reactors.mth1.composition.topics", "no topic for CO2"),
            ],
        );
    }

    #[test]
    fn broken_reactions() {
        assert_problems(
            "unbalanced-reaction.toml",
            &broken("unbalanced-reaction.toml"),
            &[
                (
                    "reactors.ref1.reactions[0].equation",
                    "is not balanced: H: products have 2 atoms fewer than reactants",
                ),
                (
                    "reactors.hts1.reactions[0].k_source",
                    "K source gillespie-beattie-1930 does not describe `CO + H2O = CO2 + H2`",
                ),
                (
                    "reactors.hts1.reactions[1].k_source",
                    "unknown K source `moe-1963`",
                ),
                (
                    "reactors.mth1.composition.components",
                    "CH4, a species of `CO + 3 H2 = CH4 + H2O`, is not analysed",
                ),
                (
                    "reactors.lts1.reactions",
                    "the reactions are not independent",
                ),
            ],
        );
    }

    #[test]
    fn peng_robinson_needs_critical_constants() {
        // Invented species file for the test: Ar with the built-in NASA 7 data
        // (data/species.toml, McBride, Gordon & Reno 1993) but no critical constants.
        let dir = tempfile::tempdir().unwrap();
        fs::write(
            dir.path().join("ar-no-critical.toml"),
            r#"
    [[species]]
    name = "Ar"
    elements = { Ar = 1 }
    source = "invented for the test: built-in Ar polynomial without critical constants"

    [[species.nasa7]]
    t_min_k = 200.0
    t_max_k = 6000.0
    coefficients = [2.5, 0.0, 0.0, 0.0, 0.0, -745.375, 4.37967491]
    "#,
        )
        .unwrap();
        let text = r#"site = "baw1"
    species_files = ["ar-no-critical.toml"]

    [broker]
    url = "mqtt://127.0.0.1"

    [journal]
    dir = "var/journal"

    [reactors.amc1]
    reactions = [{ equation = "N2 + 3 H2 = 2 NH3" }]
    eos = "peng-robinson"

    [reactors.amc1.composition]
    topic = "baw1/amc1/AI-501"
    basis = "wet"
    components = ["H2", "N2", "NH3", "Ar", "CH4"]
    max_age = "15 min"

    [[reactors.amc1.temperature]]
    topic = "baw1/amc1/TI-505"
    unit = "degC"
    max_age = "2 min"

    [reactors.amc1.pressure]
    topic = "baw1/amc1/PI-502"
    unit = "barg"
    max_age = "2 min"
    "#
        .to_string();
        let e = match check_in(&text, dir.path()) {
            Ok(_) => panic!("peng-robinson without Ar constants was accepted"),
            Err(e) => e,
        };
        assert_problems(
            "peng-robinson",
            &e,
            &[(
                "reactors.amc1.eos",
                "peng-robinson needs critical constants (tc_k, pc_bar, omega) for: Ar",
            )],
        );
        let ideal = text.replace("eos = \"peng-robinson\"", "eos = \"ideal\"");
        assert!(check_in(&ideal, dir.path()).is_ok());
    }

    #[test]
    fn uncertainty_and_transient_units() {
        // Invented config for the test; 1 degF = 5/9 K, 1 psi = 0.06894757293 bar (NIST SP 811).
        let text = with_broker("url = \"mqtt://127.0.0.1\"").replace(
            "[reactors.hts1.composition]",
            "uncertainty = { temperature = \"3.6 degF\", pressure = \"10 psi\", composition = \"1.5 %\", steam_ratio = \"4 %\" }\ntransient = \"0.1 K/s\"\nband = 0.02\nkey_component = \"H2\"\n\n[reactors.hts1.composition]",
        );
        let s = check(&text).unwrap();
        let r = &s.reactors[0];
        assert!((r.spec.uncertainty.temperature_k - 2.0).abs() < 1e-12);
        assert!((r.spec.uncertainty.pressure_bar - 0.689_475_729_3).abs() < 1e-9);
        assert!((r.spec.uncertainty.composition_rel - 0.015).abs() < 1e-15);
        assert!((r.spec.uncertainty.steam_ratio_rel - 0.04).abs() < 1e-15);
        assert!((r.spec.transient_k_per_min - 6.0).abs() < 1e-12);
        assert_eq!(r.spec.model.band_ln, 0.02);
        assert_eq!(s.species.get(r.spec.key_component).name, "H2");

        let bad = text.replace("key_component = \"H2\"", "key_component = \"N2\"");
        assert_problems(
            "key",
            &refused(&bad),
            &[(
                "reactors.hts1.key_component",
                "N2 is not a species of the reactions",
            )],
        );
    }
}
