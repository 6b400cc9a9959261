//! `eqwatch calc`: one analysis at one temperature and pressure against K(T): Q, Q/K,
//! direction, affinity, equilibrium temperature and approach with its uncertainty,
//! as JSON or as a table in the engineer's temperature unit.

use serde_json::{Map, Value, json};

use super::{CliError, finite, input, opt, parse_eos, reactions_with_k};
use crate::approach::{Approach, Flags, GasState, ReactorModel, Scratch, Uncertainty};
use crate::composition::{Basis, Component, WaterSource, WetComposition, parse_components, to_wet};
use crate::equilibrium::{EosKind, EquilibriumResult, EquilibriumSystem};
use crate::thermo::ksource::KModel;
use crate::thermo::reaction::{Reaction, unknown_hint};
use crate::thermo::species::SpeciesDb;
use crate::units::{
    CompositionUnit, TemperatureUnit, parse_pressure_with_atmosphere, parse_temperature,
    split_quantity,
};

/// Inputs of `eqwatch calc`, as text from the command line.
#[derive(Debug, Clone, Default)]
pub struct CalcInput {
    pub reactions: Vec<String>,
    pub k_sources: Vec<String>,
    pub temperature: String,
    pub pressure: Option<String>,
    pub composition: Option<String>,
    pub composition_unit: String,
    pub basis: String,
    pub steam_ratio: Option<f64>,
    pub water: Option<String>,
    pub eos: String,
    pub uncertainty: Option<String>,
    pub band_ln: Option<f64>,
    pub sum_tolerance: String,
    pub key: Option<String>,
    pub sensitivity: bool,
    pub atmosphere: Option<String>,
}

/// Parses `temperature=2K,pressure=0.5bar,composition=2%,steam-ratio=5%`.
pub fn parse_uncertainty(text: &str) -> Result<Uncertainty, CliError> {
    let mut u = Uncertainty::default();
    for item in text.split(',').map(str::trim).filter(|s| !s.is_empty()) {
        let (k, v) = item.split_once('=').ok_or_else(|| {
            CliError::Input(format!(
                "--uncertainty: `{item}` is not key=value; keys: temperature (K), pressure (bar), composition (% of reading), steam-ratio (% of value)"
            ))
        })?;
        let (x, unit) = split_quantity("uncertainty", v).map_err(input)?;
        if !(x.is_finite() && x >= 0.0) {
            return Err(CliError::Input(format!(
                "--uncertainty: {k} must be zero or more"
            )));
        }
        let unit = unit.to_ascii_lowercase();
        match (k.trim().to_ascii_lowercase().as_str(), unit.as_str()) {
            ("temperature", "k" | "degc" | "°c" | "c") => u.temperature_k = x,
            ("temperature", "degf" | "°f" | "f") => u.temperature_k = x * 5.0 / 9.0,
            ("pressure", "bar" | "bara" | "barg") => u.pressure_bar = x,
            ("pressure", "kpa" | "kpag") => u.pressure_bar = x / 100.0,
            ("pressure", "mpa" | "mpag") => u.pressure_bar = x * 10.0,
            ("pressure", "psi" | "psia" | "psig") => u.pressure_bar = x * 0.068_947_572_93,
            ("composition", "%") => u.composition_rel = x / 100.0,
            ("steam-ratio" | "steam_ratio", "%") => u.steam_ratio_rel = x / 100.0,
            (key, unit) => {
                return Err(CliError::Input(format!(
                    "--uncertainty: `{key}` with unit `{unit}` is not understood; use temperature=2K, pressure=0.5bar, composition=2%, steam-ratio=5%"
                )));
            }
        }
    }
    Ok(u)
}

fn flag_list(flags: Flags) -> Value {
    Value::Array(flags.names().map(|n| json!(n)).collect())
}

fn standard_keys(m: &mut Map<String, Value>, r: &Reaction, k: &KModel, a: &Approach) {
    m.insert("reaction".into(), json!(r.canonical()));
    m.insert("k_source".into(), json!(k.id().as_str()));
    m.insert("k_source_citation".into(), json!(k.citation()));
    m.insert("ln_k".into(), finite(a.ln_k));
    m.insert("delta_g_j_per_mol".into(), finite(a.delta_g_j_per_mol));
    m.insert("delta_h_j_per_mol".into(), finite(a.delta_h_j_per_mol));
    m.insert("delta_s_j_per_mol_k".into(), finite(a.delta_s_j_per_mol_k));
    m.insert("endothermic".into(), json!(a.endothermic));
    let (lo, hi) = k.valid_range_k();
    m.insert("k_valid_range_k".into(), json!([finite(lo), finite(hi)]));
}

fn approach_keys(m: &mut Map<String, Value>, a: &Approach) {
    m.insert("ln_q".into(), finite(a.ln_q));
    m.insert("q_over_k".into(), finite(a.q_over_k));
    m.insert("affinity_j_per_mol".into(), finite(a.affinity_j_per_mol));
    m.insert("direction".into(), json!(a.direction.as_str()));
    m.insert(
        "equilibrium_temperature_k".into(),
        opt(a.equilibrium_temperature_k),
    );
    m.insert("approach_k".into(), opt(a.approach_k));
    m.insert(
        "approach_uncertainty_k".into(),
        opt(a.approach_uncertainty_k),
    );
    m.insert("ln_q_uncertainty".into(), finite(a.ln_q_uncertainty));
    m.insert(
        "uncertainty_budget_k".into(),
        a.uncertainty_budget_k.map_or(Value::Null, |b| {
            Value::Object(
                b.parts()
                    .iter()
                    .map(|(n, x)| ((*n).to_string(), finite(*x)))
                    .collect(),
            )
        }),
    );
}

/// The ± inputs as given (`null` when none was given).
fn uncertainty_given(u: Option<&Uncertainty>) -> Value {
    u.map_or(Value::Null, |u| {
        json!({
            "temperature_k": u.temperature_k,
            "pressure_bar": u.pressure_bar,
            "composition_relative": u.composition_rel,
            "steam_ratio_relative": u.steam_ratio_rel,
        })
    })
}

/// One sentence per reaction whose K is used outside its source's valid range.
fn range_warnings(t: f64, rx: &[(Reaction, KModel)]) -> Value {
    Value::Array(
        rx.iter()
            .filter(|(_, k)| !k.in_range(t))
            .map(|(r, k)| {
                let (lo, hi) = k.valid_range_k();
                json!(format!(
                    "{t:.2} K is outside the valid range {lo:.0}-{hi:.0} K of K source {} ({}) for {}: K is extrapolated, do not rely on these figures",
                    k.id().as_str(),
                    k.id().citation(),
                    r.canonical()
                ))
            })
            .collect(),
    )
}

/// `eqwatch calc`: returns the JSON object (the table view is made from it).
pub fn calc(db: &SpeciesDb, inp: &CalcInput) -> Result<Value, CliError> {
    let t = parse_temperature(&inp.temperature)
        .map_err(|e| CliError::Input(format!("--temperature: {e}")))?;
    let rx = reactions_with_k(db, &inp.reactions, &inp.k_sources)?;
    let eos = parse_eos(&inp.eos)?;
    let atmosphere = match &inp.atmosphere {
        None => crate::units::STANDARD_ATMOSPHERE_BAR,
        Some(a) => parse_pressure_with_atmosphere(a, 0.0)
            .map_err(|e| CliError::Input(format!("--atmosphere: {e}")))?,
    };
    let mut out = Map::new();
    out.insert("temperature_k".into(), json!(t));
    out.insert(
        "advisory".into(),
        json!("advisory figures only; not a safety function"),
    );
    let Some(comp_text) = &inp.composition else {
        k_only(&mut out, inp, t, &rx, atmosphere)?;
        return Ok(Value::Object(out));
    };
    let an = analysis(db, inp, comp_text, t, atmosphere)?;
    let ev = evaluate_reactions(db, &rx, &an, eos, inp.band_ln)?;
    approach_output(&mut out, &rx, &an, &ev);
    // Equilibrium at the measured T and P with the same element inventory.
    let eqm = equilibrium_at(db, &rx, &an, eos)?;
    equilibrium_output(&mut out, &eqm);
    let key = key_component(db, inp.key.as_deref(), &rx[0].0)?;
    let fig = key_output(&mut out, db, key, &an.wet, &eqm);
    if inp.sensitivity && eqm.result.converged {
        let s = sensitivity(db, &an, &eqm, &fig);
        out.insert("sensitivity".into(), Value::Object(s));
    }
    Ok(Value::Object(out))
}

/// Without a composition: K and its thermodynamics at T for the first reaction.
fn k_only(
    out: &mut Map<String, Value>,
    inp: &CalcInput,
    t: f64,
    rx: &[(Reaction, KModel)],
    atmosphere: f64,
) -> Result<(), CliError> {
    let (r, k) = &rx[0];
    let props = k.properties(t);
    let a = Approach {
        ln_k: props.ln_k,
        delta_g_j_per_mol: props.delta_g_j_per_mol,
        delta_h_j_per_mol: props.delta_h_j_per_mol,
        delta_s_j_per_mol_k: props.delta_s_j_per_mol_k,
        ln_q: f64::NAN,
        q_over_k: f64::NAN,
        affinity_j_per_mol: f64::NAN,
        direction: crate::approach::Direction::AtEquilibrium,
        endothermic: props.delta_h_j_per_mol > 0.0,
        equilibrium_temperature_k: None,
        approach_k: None,
        approach_uncertainty_k: None,
        uncertainty_budget_k: None,
        ln_q_uncertainty: 0.0,
        flags: Flags::default(),
    };
    standard_keys(out, r, k, &a);
    let mut flags = Flags::default();
    if !k.in_range(t) {
        flags.set(Flags::TEMPERATURE_OUTSIDE_DATA);
    }
    out.insert("flags".into(), flag_list(flags));
    out.insert("warnings".into(), range_warnings(t, &rx[..1]));
    if let Some(p) = &inp.pressure {
        let p = parse_pressure_with_atmosphere(p, atmosphere)
            .map_err(|e| CliError::Input(format!("--pressure: {e}")))?;
        out.insert("pressure_bar".into(), json!(p));
    }
    Ok(())
}

/// The measured gas: T, P, the analysis on a wet basis, and the ± inputs.
struct Analysis {
    t: f64,
    p: f64,
    basis: Basis,
    wet: WetComposition,
    unc: Uncertainty,
    /// Whether `--uncertainty` was given (else `unc` is all zero).
    uncertainty_given: bool,
}

/// Reads the pressure, the analysis (unit, basis, water, sum tolerance) and the ±.
fn analysis(
    db: &SpeciesDb,
    inp: &CalcInput,
    comp_text: &str,
    t: f64,
    atmosphere: f64,
) -> Result<Analysis, CliError> {
    let p_text = inp.pressure.as_ref().ok_or_else(|| {
        CliError::Input("a composition needs --pressure (e.g. \"30 barg\" or \"150 bara\")".into())
    })?;
    let p = parse_pressure_with_atmosphere(p_text, atmosphere)
        .map_err(|e| CliError::Input(format!("--pressure: {e}")))?;
    let unit = CompositionUnit::parse(&inp.composition_unit)
        .map_err(|e| CliError::Input(format!("--composition-unit: {e}")))?;
    let comps: Vec<Component> = parse_components(comp_text, unit).map_err(input)?;
    let basis = Basis::parse(&inp.basis)
        .ok_or_else(|| CliError::Input(format!("--basis `{}`: expected wet or dry", inp.basis)))?;
    let water = water_source(inp)?;
    let (tol_v, tol_u) = split_quantity("--sum-tolerance", &inp.sum_tolerance).map_err(input)?;
    let tol_unit = if tol_u.is_empty() {
        CompositionUnit::Percent
    } else {
        CompositionUnit::parse(tol_u).map_err(input)?
    };
    let tol = tol_v * tol_unit.fraction_per_unit();
    let wet = to_wet(db, &comps, basis, water, tol).map_err(input)?;
    let unc = match &inp.uncertainty {
        None => Uncertainty::default(),
        Some(u) => parse_uncertainty(u)?,
    };
    Ok(Analysis {
        t,
        p,
        basis,
        wet,
        unc,
        uncertainty_given: inp.uncertainty.is_some(),
    })
}

/// The water of a dry analysis: `--steam-ratio` or `--water`, not both.
fn water_source(inp: &CalcInput) -> Result<Option<WaterSource>, CliError> {
    Ok(match (inp.steam_ratio, &inp.water) {
        (Some(_), Some(_)) => {
            return Err(CliError::Input(
                "give --steam-ratio or --water, not both".into(),
            ));
        }
        (Some(s), None) => Some(WaterSource::SteamRatio(s)),
        (None, Some(w)) => {
            let c =
                parse_components(&format!("H2O={w}"), CompositionUnit::Percent).map_err(input)?;
            Some(WaterSource::WetFraction(
                c[0].value * c[0].unit.fraction_per_unit(),
            ))
        }
        (None, None) => None,
    })
}

/// Every reaction evaluated for the analysis, with the model and its fugacities.
struct Evaluated {
    model: ReactorModel,
    scratch: Scratch,
    results: Vec<Approach>,
}

fn evaluate_reactions(
    db: &SpeciesDb,
    rx: &[(Reaction, KModel)],
    an: &Analysis,
    eos: EosKind,
    band_ln: Option<f64>,
) -> Result<Evaluated, CliError> {
    let wet = &an.wet;
    let mut model = ReactorModel::new(db, rx.to_vec(), &wet.species, eos, None).map_err(input)?;
    if let Some(b) = band_ln {
        if !(b.is_finite() && b >= 0.0) {
            return Err(CliError::Input(
                "--band must be zero or more (|ln(Q/K)|)".into(),
            ));
        }
        model.band_ln = b;
    }
    let state = GasState {
        temperature_k: an.t,
        pressure_bar: an.p,
        y: &wet.y,
        steam_ratio: wet.steam_ratio.zip(wet.added_water),
    };
    let mut scratch = model.scratch();
    let eos_flags = model.fugacity(&state, &mut scratch);
    let mut results = Vec::new();
    for i in 0..model.reactions().len() {
        let mut a = model.evaluate(i, &state, &scratch, &an.unc);
        a.flags.0 |= eos_flags.0;
        if (wet.analysed_sum - 1.0).abs() > 1e-9 {
            a.flags.set(Flags::COMPOSITION_NORMALISED);
        }
        if a.flags.has(Flags::ZERO_COMPONENT) {
            return Err(zero_component_error(&model, wet, i));
        }
        results.push(a);
    }
    Ok(Evaluated {
        model,
        scratch,
        results,
    })
}

/// Names the species of reaction `i` that are zero in the analysis.
fn zero_component_error(model: &ReactorModel, wet: &WetComposition, i: usize) -> CliError {
    let zero: Vec<&str> = model
        .names()
        .iter()
        .zip(&wet.y)
        .zip(model.reactions()[i].nu())
        .filter(|((_, y), nu)| **y <= 0.0 && **nu != 0.0)
        .map(|((n, _), _)| n.as_str())
        .collect();
    CliError::Input(format!(
        "{} is zero in the composition, so Q is 0 or infinite; give a component below detection at its detection limit",
        zero.join(", ")
    ))
}

/// The first reaction's figures on top, the gas, and the other reactions.
fn approach_output(
    out: &mut Map<String, Value>,
    rx: &[(Reaction, KModel)],
    an: &Analysis,
    ev: &Evaluated,
) {
    let (r0, k0) = &rx[0];
    let results = &ev.results;
    standard_keys(out, r0, k0, &results[0]);
    approach_keys(out, &results[0]);
    out.insert("flags".into(), flag_list(results[0].flags));
    out.insert("warnings".into(), range_warnings(an.t, rx));
    out.insert(
        "uncertainty_given".into(),
        uncertainty_given(an.uncertainty_given.then_some(&an.unc)),
    );
    out.insert("pressure_bar".into(), json!(an.p));
    out.insert("eos".into(), json!(ev.model.eos_kind().as_str()));
    out.insert("compressibility_factor".into(), finite(ev.scratch.z));
    out.insert("basis".into(), json!(an.basis.as_str()));
    out.insert("steam_ratio".into(), opt(an.wet.steam_ratio));
    let mut phi = Map::new();
    let mut y_map = Map::new();
    for ((n, lp), y) in ev
        .model
        .names()
        .iter()
        .zip(&ev.scratch.ln_phi)
        .zip(&an.wet.y)
    {
        phi.insert(n.clone(), finite(lp.exp()));
        y_map.insert(n.clone(), finite(*y));
    }
    out.insert("fugacity_coefficients".into(), Value::Object(phi));
    out.insert("mole_fractions".into(), Value::Object(y_map));
    if rx.len() > 1 {
        let others: Vec<Value> = rx[1..]
            .iter()
            .zip(&results[1..])
            .map(|((r, k), a)| {
                let mut m = Map::new();
                standard_keys(&mut m, r, k, a);
                approach_keys(&mut m, a);
                m.insert("flags".into(), flag_list(a.flags));
                Value::Object(m)
            })
            .collect();
        out.insert("other_reactions".into(), Value::Array(others));
    }
}

/// The equilibrium of the measured gas at its T and P: the system, the moles it was
/// given (system order) and the result.
struct EquilibriumAt {
    sys: EquilibriumSystem,
    moles: Vec<f64>,
    result: EquilibriumResult,
}

fn equilibrium_at(
    db: &SpeciesDb,
    rx: &[(Reaction, KModel)],
    an: &Analysis,
    eos: EosKind,
) -> Result<EquilibriumAt, CliError> {
    let wet = &an.wet;
    let sys = EquilibriumSystem::from_reactions(db, rx, &wet.species, eos, None).map_err(input)?;
    let moles: Vec<f64> = sys
        .species()
        .iter()
        .map(|s| {
            wet.species
                .iter()
                .position(|x| x == s)
                .map_or(0.0, |i| wet.y[i])
        })
        .collect();
    let result = sys.solve(db, an.t, an.p, &moles);
    Ok(EquilibriumAt { sys, moles, result })
}

fn equilibrium_output(out: &mut Map<String, Value>, eqm: &EquilibriumAt) {
    let eq = &eqm.result;
    out.insert("equilibrium_converged".into(), json!(eq.converged));
    if !eq.converged {
        out.insert("equilibrium_reason".into(), json!(eq.reason));
    }
    let mut eq_map = Map::new();
    for (n, y) in eqm.sys.names().iter().zip(&eq.mole_fractions) {
        eq_map.insert(n.clone(), finite(*y));
    }
    out.insert("equilibrium_mole_fractions".into(), Value::Object(eq_map));
}

/// The key component: `--key` (a species of the first reaction), else the single
/// product where there is one, else the first reactant.
fn key_component(db: &SpeciesDb, key: Option<&str>, r0: &Reaction) -> Result<usize, CliError> {
    Ok(match key {
        Some(k) => {
            let idx = db.index_of(k).ok_or_else(|| {
                CliError::Input(format!(
                    "--key: unknown species `{k}`{}",
                    unknown_hint(db, k)
                ))
            })?;
            if !r0.species.contains(&idx) {
                return Err(CliError::Input(format!(
                    "--key {k} is not a species of `{}`",
                    r0.canonical()
                )));
            }
            idx
        }
        // Default key component: the single product where there is one (NH3, SO3,
        // CH3OH), else the first reactant as written (CH4 at a reformer, CO at a shift).
        None => {
            let products: Vec<usize> = r0
                .species
                .iter()
                .zip(&r0.nu)
                .filter(|(_, n)| **n > 0.0)
                .map(|(s, _)| *s)
                .collect();
            if products.len() == 1 {
                products[0]
            } else {
                r0.species[0]
            }
        }
    })
}

/// Where the key component and water sit in the equilibrium system, and the key's
/// equilibrium mole fraction.
struct KeyFigures {
    name: String,
    eq_pos: Option<usize>,
    water_pos: Option<usize>,
    equilibrium: Option<f64>,
}

/// The key component measured and at equilibrium, wet and (with water) dry.
fn key_output(
    out: &mut Map<String, Value>,
    db: &SpeciesDb,
    key: usize,
    wet: &WetComposition,
    eqm: &EquilibriumAt,
) -> KeyFigures {
    let (sys, eq) = (&eqm.sys, &eqm.result);
    let key_name = db.get(key).name.clone();
    let measured = wet.species.iter().position(|s| *s == key).map(|i| wet.y[i]);
    let k_eq_pos = sys.species().iter().position(|s| *s == key);
    let equilibrium = k_eq_pos.map(|i| eq.mole_fractions[i]);
    out.insert("key_component".into(), json!(key_name));
    out.insert("key_measured_mole_fraction".into(), opt(measured));
    out.insert("key_equilibrium_mole_fraction".into(), opt(equilibrium));
    let water_pos = sys.names().iter().position(|n| n == "H2O");
    if let (Some(w), Some(i)) = (water_pos, k_eq_pos) {
        let dry = |y: &[f64]| y[i] / (1.0 - y[w]);
        out.insert(
            "key_equilibrium_dry_mole_fraction".into(),
            finite(dry(&eq.mole_fractions)),
        );
        if let (Some(m), Some(wm)) = (
            measured,
            wet.species.iter().position(|s| *s == sys.species()[w]),
        ) {
            out.insert(
                "key_measured_dry_mole_fraction".into(),
                finite(m / (1.0 - wet.y[wm])),
            );
        }
    }
    KeyFigures {
        name: key_name,
        eq_pos: k_eq_pos,
        water_pos,
        equilibrium,
    }
}

/// How the key's equilibrium mole fraction moves with ±5 K, +10 bar and 0.1 more steam
/// per mol of dry gas.
fn sensitivity(
    db: &SpeciesDb,
    an: &Analysis,
    eqm: &EquilibriumAt,
    fig: &KeyFigures,
) -> Map<String, Value> {
    let (t, p, moles) = (an.t, an.p, &eqm.moles);
    let key_at = |tt: f64, pp: f64, mm: &[f64]| -> Value {
        let r = eqm.sys.solve(db, tt, pp, mm);
        if r.converged {
            opt(fig.eq_pos.map(|i| r.mole_fractions[i]))
        } else {
            Value::Null
        }
    };
    let mut figures = Map::new();
    figures.insert("key_component".into(), json!(fig.name));
    figures.insert("base".into(), opt(fig.equilibrium));
    figures.insert("temperature_minus_5_k".into(), key_at(t - 5.0, p, moles));
    figures.insert("temperature_plus_5_k".into(), key_at(t + 5.0, p, moles));
    figures.insert("pressure_plus_10_bar".into(), key_at(t, p + 10.0, moles));
    if let Some(w) = fig.water_pos {
        // 0.1 mol more steam per mol of dry gas.
        let dry: f64 = moles
            .iter()
            .enumerate()
            .filter(|(i, _)| *i != w)
            .map(|(_, m)| m)
            .sum();
        let mut more = moles.clone();
        more[w] += 0.1 * dry;
        let v = key_at(t, p, &more);
        // Per mol of the original gas, then as a fraction of the new total.
        figures.insert("steam_ratio_plus_0_1".into(), v);
    }
    figures.insert("basis".into(), json!("wet mole fraction at equilibrium"));
    figures
}

/// The unit of a `--temperature` text (kelvin if it cannot be read; `calc` has
/// refused such a text already).
pub fn temperature_unit_of(text: &str) -> TemperatureUnit {
    split_quantity("temperature", text)
        .ok()
        .and_then(|(_, u)| TemperatureUnit::parse(u).ok())
        .unwrap_or(TemperatureUnit::Kelvin)
}

/// A temperature in the unit the user gave, to 0.01.
fn temperature_text(k: f64, unit: TemperatureUnit) -> String {
    match unit {
        TemperatureUnit::Kelvin => format!("{k:.2} K"),
        TemperatureUnit::Celsius => format!("{:.2} °C", k - 273.15),
        TemperatureUnit::Fahrenheit => format!("{:.2} °F", (k - 273.15) * 1.8 + 32.0),
        TemperatureUnit::Rankine => format!("{:.2} °R", k * 1.8),
    }
}

/// A temperature difference ± u in K, with °F/°R beside it for those units.
fn difference_text(dk: f64, u: f64, unit: TemperatureUnit, sign: &str) -> String {
    let k = format!("{sign}{dk:.2} ± {u:.2} K");
    match unit {
        TemperatureUnit::Kelvin | TemperatureUnit::Celsius => k,
        TemperatureUnit::Fahrenheit => format!("{k} ({sign}{:.2} ± {:.2} °F)", dk * 1.8, u * 1.8),
        TemperatureUnit::Rankine => format!("{k} ({sign}{:.2} ± {:.2} °R)", dk * 1.8, u * 1.8),
    }
}

/// `n` significant figures; plain notation from 1e-4 to below 1e6, else scientific.
fn significant(x: f64, n: usize) -> String {
    if !x.is_finite() {
        return "-".into();
    }
    if x == 0.0 {
        return "0".into();
    }
    let e = x.abs().log10().floor() as i32;
    if !(-4..6).contains(&e) {
        return format!("{:.*e}", n.saturating_sub(1), x);
    }
    let decimals = (n as i32 - 1 - e).max(0) as usize;
    format!("{x:.decimals$}")
}

fn number(m: &Value, key: &str) -> Option<f64> {
    m.get(key).and_then(Value::as_f64)
}

fn kj(m: &Value, key: &str) -> String {
    number(m, key).map_or("-".into(), |x| format!("{:.2} kJ/mol", x / 1000.0))
}

/// Budget keys as a plant engineer names the inputs.
fn input_words(key: &str) -> &str {
    match key {
        "composition" => "analyser",
        "steam_ratio" => "steam ratio",
        "temperature" => "thermocouple",
        other => other,
    }
}

fn direction_words(d: &str) -> &'static str {
    match d {
        "forward" => {
            "forward: Q < K, short of equilibrium (the reaction as written can still proceed)"
        }
        "reverse" => {
            "reverse: Q > K, the gas is past equilibrium (the reverse reaction is favoured)"
        }
        "at_equilibrium" => "at equilibrium: Q within the band around K",
        _ => "-",
    }
}

/// Flags as words, one per line with what to look at.
fn flag_rows(out: &mut String, m: &Value) {
    let names: Vec<&str> = m["flags"]
        .as_array()
        .map(|a| a.iter().filter_map(Value::as_str).collect())
        .unwrap_or_default();
    if names.is_empty() {
        out.push_str("  flags             none\n");
    }
    for (i, n) in names.iter().enumerate() {
        let why = Flags::bit_of(n).map_or("", Flags::explain);
        let label = if i == 0 { "flags" } else { "" };
        out.push_str(&format!("  {label:<17} {}: {why}\n", n.replace('_', " ")));
    }
}

/// The headline rows of one reaction: approach ± u with its budget, T_eq, Q/K, direction, flags.
fn reaction_rows(out: &mut String, m: &Value, unit: TemperatureUnit, given: bool) {
    match number(m, "approach_k") {
        Some(a) => {
            let u = number(m, "approach_uncertainty_k");
            let sign = if a > 0.0 { "+" } else { "" };
            let text = match (u, given) {
                (Some(u), true) => difference_text(a, u, unit, sign),
                (None, true) => format!("{sign}{a:.2} K ± (not finite)"),
                _ => format!("{sign}{a:.2} K   (no uncertainty given)"),
            };
            out.push_str(&format!("  approach          {text}\n"));
            if let (true, Some(b)) = (given, m["uncertainty_budget_k"].as_object()) {
                let mut parts: Vec<(&str, f64)> = b
                    .iter()
                    .filter_map(|(k, v)| v.as_f64().map(|x| (k.as_str(), x)))
                    .filter(|(_, x)| *x > 0.0)
                    .collect();
                parts.sort_by(|a, b| b.1.total_cmp(&a.1));
                let text: Vec<String> = parts
                    .iter()
                    .map(|(k, x)| format!("{} {x:.2} K", input_words(k)))
                    .collect();
                if !text.is_empty() {
                    out.push_str(&format!("  ± from            {}\n", text.join(", ")));
                }
            }
        }
        None => {
            let why = [
                "enthalpy_sign_change",
                "no_equilibrium_temperature",
                "thermoneutral",
            ]
            .iter()
            .find(|f| {
                m["flags"]
                    .as_array()
                    .is_some_and(|a| a.iter().any(|x| x == **f))
            })
            .and_then(|f| Flags::bit_of(f))
            .map_or("not available", Flags::explain);
            out.push_str(&format!("  approach          none: {why}\n"));
        }
    }
    let t_eq =
        number(m, "equilibrium_temperature_k").map_or("-".into(), |x| temperature_text(x, unit));
    out.push_str(&format!("  T equilibrium     {t_eq}\n"));
    let qk = number(m, "q_over_k").map_or("-".into(), |x| significant(x, 4));
    out.push_str(&format!("  Q/K               {qk}\n"));
    out.push_str(&format!(
        "  direction         {}\n",
        direction_words(m["direction"].as_str().unwrap_or(""))
    ));
    flag_rows(out, m);
}

/// Mole per cent with four significant figures.
fn mol_percent(x: Option<f64>) -> String {
    x.map_or("-".into(), |x| {
        format!("{} mol %", significant(x * 100.0, 4))
    })
}

/// The `eqwatch calc` table: warnings, a headline block (approach ± u, temperatures in
/// the user's unit, Q/K, direction in words, key component on the analyser's basis,
/// flags in words) for each reaction, then the details.
pub fn calc_table(v: &Value, unit: TemperatureUnit) -> String {
    let mut o = String::new();
    o.push_str("eqwatch calc: advisory figures only; not a safety function\n");
    if let Some(w) = v["warnings"].as_array().filter(|w| !w.is_empty()) {
        o.push('\n');
        for x in w {
            o.push_str(&format!("WARNING: {}\n", x.as_str().unwrap_or("")));
        }
    }
    o.push('\n');
    let t = number(v, "temperature_k").unwrap_or(f64::NAN);
    let reactions: Vec<&Value> = std::iter::once(v)
        .chain(v["other_reactions"].as_array().into_iter().flatten())
        .collect();
    if v.get("ln_q").is_none() {
        // K only.
        o.push_str(&format!("At {}\n", temperature_text(t, unit)));
        reaction_head(&mut o, 0, reactions.len(), v);
        k_only_rows(&mut o, v);
        return o;
    }
    let given = !v["uncertainty_given"].is_null();
    o.push_str(&format!(
        "At {} and {:.2} bar abs; {} gas; {} analysis{}\n\n",
        temperature_text(t, unit),
        number(v, "pressure_bar").unwrap_or(f64::NAN),
        v["eos"].as_str().unwrap_or("-"),
        v["basis"].as_str().unwrap_or("-"),
        number(v, "steam_ratio").map_or(String::new(), |s| format!(", steam/dry gas {s:.4}"))
    ));
    for (i, m) in reactions.iter().enumerate() {
        reaction_head(&mut o, i, reactions.len(), m);
        reaction_rows(&mut o, m, unit, given);
        o.push('\n');
    }
    key_rows(&mut o, v);
    // Details.
    o.push_str("\nDetails\n");
    for (i, m) in reactions.iter().enumerate() {
        detail_rows(&mut o, i, m, t, given);
    }
    gas_rows(&mut o, v);
    sensitivity_row(&mut o, v);
    if let Some(u) = v["uncertainty_given"].as_object() {
        let g = |k: &str| u.get(k).and_then(Value::as_f64).unwrap_or(f64::NAN);
        o.push_str(&format!(
            "  ± given           thermocouple {} K, pressure {} bar, analyser {} % of reading, steam ratio {} %\n",
            g("temperature_k"),
            g("pressure_bar"),
            g("composition_relative") * 100.0,
            g("steam_ratio_relative") * 100.0
        ));
    }
    o
}

/// "Reaction i of n: ..." with its K source, and ΔH° at T.
fn reaction_head(o: &mut String, i: usize, n_reactions: usize, m: &Value) {
    let endo = match m["endothermic"].as_bool() {
        Some(true) => "endothermic",
        Some(false) => "exothermic",
        None => "-",
    };
    let label = if n_reactions > 1 {
        format!("Reaction {} of {}: ", i + 1, n_reactions)
    } else {
        "Reaction: ".into()
    };
    o.push_str(&format!(
        "{label}{}   [K: {}; {endo} at T, ΔH° {}]\n",
        m["reaction"].as_str().unwrap_or("-"),
        m["k_source"].as_str().unwrap_or("-"),
        kj(m, "delta_h_j_per_mol")
    ));
}

/// K and its thermodynamics, for a calculation without a composition.
fn k_only_rows(o: &mut String, v: &Value) {
    let lnk = number(v, "ln_k").unwrap_or(f64::NAN);
    o.push_str(&format!(
        "  K                 {}\n",
        significant(lnk.exp(), 4)
    ));
    o.push_str(&format!("  ln K              {lnk:.4}\n"));
    o.push_str(&format!(
        "  ΔG°               {}\n",
        kj(v, "delta_g_j_per_mol")
    ));
    o.push_str(&format!(
        "  ΔS°               {}\n",
        number(v, "delta_s_j_per_mol_k").map_or("-".into(), |x| format!("{x:.2} J/(mol K)"))
    ));
    flag_rows(o, v);
    o.push_str(&format!(
        "  K source          {}\n",
        v["k_source_citation"].as_str().unwrap_or("-")
    ));
}

/// The key component measured and at equilibrium (dry for a dry analysis).
fn key_rows(o: &mut String, v: &Value) {
    let dry = v["basis"] == "dry";
    let key = v["key_component"].as_str().unwrap_or("-");
    let (measured, equilibrium, basis) = if dry && v.get("key_measured_dry_mole_fraction").is_some()
    {
        (
            number(v, "key_measured_dry_mole_fraction"),
            number(v, "key_equilibrium_dry_mole_fraction"),
            "dry",
        )
    } else {
        (
            number(v, "key_measured_mole_fraction"),
            number(v, "key_equilibrium_mole_fraction"),
            "wet",
        )
    };
    o.push_str(&format!(
        "Key component {key} ({basis} basis): measured {}, at equilibrium {}\n",
        mol_percent(measured),
        mol_percent(equilibrium)
    ));
    if v["equilibrium_converged"] == false {
        o.push_str(&format!(
            "  equilibrium composition not found: {}\n",
            v["equilibrium_reason"].as_str().unwrap_or("-")
        ));
    }
}

/// The details of reaction `i`: K source and range, ln K and ln Q, ΔG°, ΔH°, ΔS°,
/// affinity, T and T_eq.
fn detail_rows(o: &mut String, i: usize, m: &Value, t: f64, given: bool) {
    o.push_str(&format!(
        "  reaction {}: {}\n",
        i + 1,
        m["reaction"].as_str().unwrap_or("-")
    ));
    let range = m["k_valid_range_k"]
        .as_array()
        .map(|r| {
            format!(
                "{:.0}-{:.0} K",
                r.first().and_then(Value::as_f64).unwrap_or(f64::NAN),
                r.get(1).and_then(Value::as_f64).unwrap_or(f64::NAN)
            )
        })
        .unwrap_or_default();
    o.push_str(&format!(
        "    K source        {}: {}\n    K valid         {range}\n",
        m["k_source"].as_str().unwrap_or("-"),
        m["k_source_citation"].as_str().unwrap_or("-")
    ));
    let ln_q_pm = match number(m, "ln_q_uncertainty") {
        Some(x) if given => format!(" (ln Q ± {x:.4})"),
        _ => String::new(),
    };
    o.push_str(&format!(
        "    ln K, ln Q      {:.4}, {:.4}{ln_q_pm}\n",
        number(m, "ln_k").unwrap_or(f64::NAN),
        number(m, "ln_q").unwrap_or(f64::NAN),
    ));
    o.push_str(&format!(
        "    ΔG°, ΔH°, ΔS°   {}, {}, {}\n",
        kj(m, "delta_g_j_per_mol"),
        kj(m, "delta_h_j_per_mol"),
        number(m, "delta_s_j_per_mol_k").map_or("-".into(), |x| format!("{x:.2} J/(mol K)"))
    ));
    o.push_str(&format!(
        "    affinity        {} (R T ln(K/Q))\n",
        kj(m, "affinity_j_per_mol")
    ));
    o.push_str(&format!(
        "    T, T_eq         {:.2} K, {}\n",
        t,
        number(m, "equilibrium_temperature_k").map_or("-".into(), |x| format!("{x:.2} K"))
    ));
}

/// The gas model and, per species, measured and equilibrium mol % and φ.
fn gas_rows(o: &mut String, v: &Value) {
    o.push_str(&format!(
        "  gas               {} (Z {}); wet mole fractions in mol %\n",
        v["eos"].as_str().unwrap_or("-"),
        number(v, "compressibility_factor").map_or("-".into(), |z| format!("{z:.4}"))
    ));
    o.push_str(&format!(
        "    {:<8} {:>12} {:>14} {:>8}\n",
        "species", "measured", "equilibrium", "φ"
    ));
    if let Some(y) = v["mole_fractions"].as_object() {
        for (n, x) in y {
            let pct = |val: &Value| {
                val.as_f64()
                    .map_or("-".into(), |x| significant(x * 100.0, 5))
            };
            o.push_str(&format!(
                "    {n:<8} {:>12} {:>14} {:>8}\n",
                pct(x),
                pct(&v["equilibrium_mole_fractions"][n]),
                v["fugacity_coefficients"][n]
                    .as_f64()
                    .map_or("-".into(), |p| format!("{p:.4}"))
            ));
        }
    }
}

/// The key's equilibrium mol % now and after each step, when asked for.
fn sensitivity_row(o: &mut String, v: &Value) {
    if let Some(s) = v["sensitivity"].as_object() {
        let pct = |k: &str| {
            s.get(k)
                .and_then(Value::as_f64)
                .map_or("-".into(), |x| significant(x * 100.0, 4))
        };
        o.push_str(&format!(
            "  sensitivity       equilibrium {} (wet mol %): {} now; T −5 K {}, T +5 K {}, P +10 bar {}, steam/dry gas +0.1 {}\n",
            s.get("key_component").and_then(Value::as_str).unwrap_or("-"),
            pct("base"),
            pct("temperature_minus_5_k"),
            pct("temperature_plus_5_k"),
            pct("pressure_plus_10_bar"),
            pct("steam_ratio_plus_0_1")
        ));
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// README quick start: the LTS outlet with Moe's K, ±2 K, ±2 % of reading, ±5 % steam.
    fn lts(temperature: &str, k_source: &str, uncertainty: Option<&str>) -> CalcInput {
        CalcInput {
            reactions: vec!["CO + H2O = CO2 + H2".into()],
            k_sources: vec![k_source.into()],
            temperature: temperature.into(),
            pressure: Some("29 barg".into()),
            composition: Some("H2=61.0536,N2=18.98637,CO=0.28697,CO2=19.38096,CH4=0.2921".into()),
            composition_unit: "mol%".into(),
            basis: "dry".into(),
            steam_ratio: Some(0.36312),
            eos: "ideal".into(),
            uncertainty: uncertainty.map(Into::into),
            sum_tolerance: "2 mol%".into(),
            ..Default::default()
        }
    }

    const README_UNC: &str = "temperature=2K,composition=2%,steam-ratio=5%";

    #[test]
    fn calc_json_keeps_its_keys_and_adds_the_budget() {
        let db = SpeciesDb::builtin();
        let v = calc(&db, &lts("220 degC", "moe-1962", Some(README_UNC))).unwrap();
        // Keys the README and scripts/crosscheck_*.py read stay as they were.
        for k in [
            "temperature_k",
            "ln_k",
            "ln_q",
            "q_over_k",
            "direction",
            "approach_k",
            "approach_uncertainty_k",
            "equilibrium_temperature_k",
            "delta_g_j_per_mol",
            "delta_h_j_per_mol",
            "delta_s_j_per_mol_k",
            "pressure_bar",
            "fugacity_coefficients",
            "mole_fractions",
            "compressibility_factor",
            "flags",
            "key_measured_dry_mole_fraction",
            "key_equilibrium_dry_mole_fraction",
        ] {
            assert!(v.get(k).is_some(), "{k} missing");
        }
        // README quick start figures (this program's output, recorded there).
        assert!((v["approach_k"].as_f64().unwrap() - 11.999225).abs() < 1e-6);
        let u = v["approach_uncertainty_k"].as_f64().unwrap();
        assert!((u - 3.936563).abs() < 1e-6);
        let b = v["uncertainty_budget_k"].as_object().unwrap();
        let sq: f64 = ["composition", "steam_ratio", "pressure", "temperature"]
            .iter()
            .map(|k| b[*k].as_f64().unwrap().powi(2))
            .sum();
        assert!((sq - u * u).abs() < 1e-9, "{b:?}");
        assert_eq!(v["warnings"], json!([]));
        assert_eq!(v["uncertainty_given"]["composition_relative"], 0.02);
    }

    #[test]
    fn table_leads_with_the_headline_in_the_users_unit() {
        let db = SpeciesDb::builtin();
        let v = calc(&db, &lts("220 degC", "moe-1962", Some(README_UNC))).unwrap();
        let t = calc_table(&v, temperature_unit_of("220 degC"));
        let details = t.find("Details").unwrap();
        // docs/domain.md §8 [derived]: approach 12.00 K, T_eq 220 °C + 12 K, measured CO 0.28697 %
        // dry against 0.23128 % dry at equilibrium, Q/K ≈ 0.802.
        for want in [
            "At 220.00 °C",
            "approach          +12.00 ± 3.94 K",
            "T equilibrium     232.00 °C",
            "Q/K               0.8021",
            "direction         forward: Q < K",
            "Key component CO (dry basis): measured 0.2870 mol %, at equilibrium 0.2313 mol %",
            "flags             none",
        ] {
            let at = t
                .find(want)
                .unwrap_or_else(|| panic!("`{want}` not in\n{t}"));
            assert!(at < details, "`{want}` after the details");
        }
        // Each input's share, largest first: the steam ratio here.
        assert!(
            t.contains(
                "± from            steam ratio 2.79 K, thermocouple 2.00 K, analyser 1.93 K"
            ),
            "{t}"
        );
        assert!(!t.contains("0.000000"), "{t}");
    }

    #[test]
    fn table_without_uncertainty_has_no_zero_plus_minus_and_rows_per_reaction() {
        let db = SpeciesDb::builtin();
        let inp = CalcInput {
            reactions: vec!["CH4 + H2O = CO + 3 H2".into(), "CO + H2O = CO2 + H2".into()],
            k_sources: vec!["xu-froment-1989".into()],
            temperature: "1081.15 K".into(),
            pressure: Some("30 bara".into()),
            composition: Some("CH4=11.3250,CO=9.8659,CO2=9.8423,H2=68.9668".into()),
            composition_unit: "mol%".into(),
            basis: "dry".into(),
            steam_ratio: Some(0.63549),
            eos: "ideal".into(),
            sum_tolerance: "2 mol%".into(),
            ..Default::default()
        };
        let v = calc(&db, &inp).unwrap();
        let t = calc_table(&v, temperature_unit_of(&inp.temperature));
        // README: reforming +12.00 K, the shift −12.0 K beyond equilibrium (no ± given).
        assert!(t.contains("Reaction 1 of 2: CH4 + H2O = CO + 3 H2"), "{t}");
        assert!(t.contains("Reaction 2 of 2: CO + H2O = CO2 + H2"), "{t}");
        assert!(
            t.contains("approach          +12.00 K   (no uncertainty given)"),
            "{t}"
        );
        assert!(
            t.contains("approach          -12.00 K   (no uncertainty given)"),
            "{t}"
        );
        assert!(t.contains("T equilibrium     1069.15 K"), "{t}");
        assert!(t.contains("beyond equilibrium: Q is beyond K"), "{t}");
        assert!(!t.contains('±'), "no ± without an uncertainty:\n{t}");
        assert!(!t.contains('{'), "no JSON in the table:\n{t}");
    }

    #[test]
    fn out_of_range_temperature_is_a_warning_on_top() {
        let db = SpeciesDb::builtin();
        let v = calc(&db, &lts("7000 K", "species-data", Some(README_UNC))).unwrap();
        let w = v["warnings"].as_array().unwrap();
        assert_eq!(w.len(), 1, "{w:?}");
        let w = w[0].as_str().unwrap();
        // NASA TM-4513 fits of the built-in data cover 200-6000 K.
        assert!(
            w.contains("200-6000 K") && w.contains("species-data"),
            "{w}"
        );
        assert!(
            v["flags"]
                .as_array()
                .unwrap()
                .contains(&json!("temperature_outside_data_range"))
        );
        // ΔH° changes sign between 7000 K and T_eq: no approach, and why.
        assert!(v["approach_k"].is_null());
        assert!(
            v["flags"]
                .as_array()
                .unwrap()
                .contains(&json!("enthalpy_sign_change"))
        );
        let t = calc_table(&v, TemperatureUnit::Kelvin);
        let warn = t.find("WARNING: 7000.00 K is outside").unwrap();
        assert!(warn < t.find("Reaction:").unwrap(), "{t}");
        assert!(
            t.contains("approach          none: ΔH° has a different sign"),
            "{t}"
        );
        // K only, no composition: the same warning.
        let k_only = CalcInput {
            composition: None,
            ..lts("7000 K", "species-data", None)
        };
        let v = calc(&db, &k_only).unwrap();
        assert_eq!(v["warnings"].as_array().unwrap().len(), 1);
        assert!(calc_table(&v, TemperatureUnit::Kelvin).contains("WARNING: 7000.00 K"));
    }
}
