//! `eqwatch equilibrium`: the equilibrium composition of a feed at a temperature and
//! pressure (element constraints, several reactions, ideal gas or Peng-Robinson).

use serde_json::{Map, Value, json};

use super::{CliError, finite, input, parse_eos, reactions_with_k};
use crate::composition::parse_components;
use crate::equilibrium::{EosKind, EquilibriumResult, EquilibriumSystem};
use crate::thermo::reaction::unknown_hint;
use crate::thermo::species::SpeciesDb;
use crate::units::{CompositionUnit, parse_pressure_with_atmosphere, parse_temperature};

#[derive(Debug, Clone, Default)]
pub struct EquilibriumInput {
    pub species: String,
    pub feed: String,
    pub temperature: String,
    pub pressure: String,
    pub inert: Option<String>,
    pub eos: String,
    pub reactions: Vec<String>,
    pub k_sources: Vec<String>,
}

fn species_list(db: &SpeciesDb, text: &str, what: &str) -> Result<Vec<usize>, CliError> {
    let mut out = Vec::new();
    for n in text.split(',').map(str::trim).filter(|s| !s.is_empty()) {
        let i = db.index_of(n).ok_or_else(|| {
            CliError::Input(format!(
                "{what}: unknown species `{n}`{}",
                unknown_hint(db, n)
            ))
        })?;
        if out.contains(&i) {
            return Err(CliError::Input(format!("{what}: {n} is listed twice")));
        }
        out.push(i);
    }
    Ok(out)
}

/// `eqwatch equilibrium`.
pub fn equilibrium(db: &SpeciesDb, inp: &EquilibriumInput) -> Result<Value, CliError> {
    let t = parse_temperature(&inp.temperature)
        .map_err(|e| CliError::Input(format!("--temperature: {e}")))?;
    let p = parse_pressure_with_atmosphere(&inp.pressure, crate::units::STANDARD_ATMOSPHERE_BAR)
        .map_err(|e| CliError::Input(format!("--pressure: {e}")))?;
    let eos = parse_eos(&inp.eos)?;
    let sys = system(db, inp, eos)?;
    let moles = feed_moles(db, &inp.feed, &sys)?;
    let r = sys.solve(db, t, p, &moles);
    if !r.converged {
        // The solver reports why (no reacting species, a state it cannot reach): that is
        // about the input, not a failure of the program.
        return Err(CliError::Input(format!(
            "no equilibrium composition for this feed at {t:.2} K and {p} bar: {}; check --feed, --species and --inert (at least one reacting species with moles), or try a less extreme temperature or pressure",
            r.reason
        )));
    }
    let mut out = Map::new();
    out.insert("temperature_k".into(), json!(t));
    out.insert("pressure_bar".into(), json!(p));
    out.insert("eos".into(), json!(eos.as_str()));
    composition_keys(&mut out, &sys, &r);
    out.insert("iterations".into(), json!(r.iterations));
    out.insert("converged".into(), json!(r.converged));
    out.insert(
        "k_source".into(),
        json!(if inp.reactions.is_empty() {
            "species-data".to_string()
        } else {
            inp.k_sources
                .first()
                .cloned()
                .unwrap_or_else(|| "species-data".into())
        }),
    );
    Ok(Value::Object(out))
}

/// The system of `--species` and `--inert`, from species data or from `--reaction`.
fn system(
    db: &SpeciesDb,
    inp: &EquilibriumInput,
    eos: EosKind,
) -> Result<EquilibriumSystem, CliError> {
    let reactive = species_list(db, &inp.species, "--species")?;
    if reactive.is_empty() {
        return Err(CliError::Input(
            "--species: give the species that may react, e.g. \"CH4,H2O,CO,CO2,H2\"".into(),
        ));
    }
    let inert = match &inp.inert {
        Some(t) => species_list(db, t, "--inert")?,
        None => Vec::new(),
    };
    if let Some(s) = inert.iter().find(|s| reactive.contains(s)) {
        return Err(CliError::Input(format!(
            "{} is in --species and --inert; give it once",
            db.get(*s).name
        )));
    }
    if inp.reactions.is_empty() {
        if !inp.k_sources.is_empty() {
            return Err(CliError::Input(
                "--k-source needs --reaction (species data are used otherwise)".into(),
            ));
        }
        return EquilibriumSystem::from_species(db, &reactive, &inert, eos, None).map_err(input);
    }
    let rx = reactions_with_k(db, &inp.reactions, &inp.k_sources)?;
    for (r, _) in &rx {
        if let Some(s) = r.species.iter().find(|s| !reactive.contains(s)) {
            return Err(CliError::Input(format!(
                "species {} of `{}` is not in --species",
                db.get(*s).name,
                r.canonical()
            )));
        }
    }
    let mut all = reactive.clone();
    all.extend(&inert);
    EquilibriumSystem::from_reactions(db, &rx, &all, eos, None).map_err(input)
}

/// Moles per species of `sys` from the `--feed` text.
fn feed_moles(db: &SpeciesDb, text: &str, sys: &EquilibriumSystem) -> Result<Vec<f64>, CliError> {
    let feed = parse_components(text, CompositionUnit::Fraction).map_err(input)?;
    let mut moles = vec![0.0; sys.species().len()];
    for c in &feed {
        let i = db.index_of(&c.species).ok_or_else(|| {
            CliError::Input(format!(
                "--feed: unknown species `{}`{}",
                c.species,
                unknown_hint(db, &c.species)
            ))
        })?;
        let pos = sys.species().iter().position(|s| *s == i).ok_or_else(|| {
            CliError::Input(format!(
                "--feed: {} is neither in --species nor in --inert",
                db.get(i).name
            ))
        })?;
        if !(c.value.is_finite() && c.value >= 0.0) {
            return Err(CliError::Input(format!(
                "--feed: {} = {} must be zero or more",
                c.species, c.value
            )));
        }
        moles[pos] += c.value * c.unit.fraction_per_unit();
    }
    if moles.iter().sum::<f64>() <= 0.0 {
        return Err(CliError::Input(
            "--feed: give some moles, e.g. \"CH4=1,H2O=3\"".into(),
        ));
    }
    Ok(moles)
}

/// Mole fractions, dry ones and the steam ratio where there is water, and φ.
fn composition_keys(out: &mut Map<String, Value>, sys: &EquilibriumSystem, r: &EquilibriumResult) {
    let mut y = Map::new();
    for (n, v) in sys.names().iter().zip(&r.mole_fractions) {
        y.insert(n.clone(), finite(*v));
    }
    out.insert("mole_fractions".into(), Value::Object(y));
    if let Some(w) = sys.names().iter().position(|n| n == "H2O") {
        let yw = r.mole_fractions[w];
        let mut d = Map::new();
        for (i, (n, v)) in sys.names().iter().zip(&r.mole_fractions).enumerate() {
            if i != w {
                d.insert(n.clone(), finite(v / (1.0 - yw)));
            }
        }
        out.insert("dry_mole_fractions".into(), Value::Object(d));
        out.insert("steam_to_dry_gas_ratio".into(), finite(yw / (1.0 - yw)));
    }
    let mut phi = Map::new();
    for (n, lp) in sys.names().iter().zip(&r.ln_phi) {
        phi.insert(n.clone(), finite(lp.exp()));
    }
    out.insert("fugacity_coefficients".into(), Value::Object(phi));
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_feed_with_nothing_that_reacts_is_bad_input_not_an_internal_error() {
        // Issue 10 §1, reproduced first: exit 2 "internal error: equilibrium did not
        // converge: no reacting species present". Invented feed: argon only.
        let db = SpeciesDb::builtin();
        let inp = EquilibriumInput {
            species: "CH4,H2O,CO,CO2,H2".into(),
            feed: "Ar=1".into(),
            temperature: "800 degC".into(),
            pressure: "30 bar".into(),
            inert: Some("Ar".into()),
            eos: "ideal".into(),
            ..EquilibriumInput::default()
        };
        let e = equilibrium(&db, &inp).unwrap_err();
        assert_eq!(e.exit_code(), 1, "{e}");
        assert!(e.to_string().contains("check --feed"), "{e}");
    }
}
