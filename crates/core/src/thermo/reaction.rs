//! Reaction equations: parsing (`N2 + 3 H2 = 2 NH3`, `0.5 N2 + 1.5 H2 = NH3`,
//! `1/2 N2 + 3/2 H2 <=> NH3`), species look-up and the element balance.
//!
//! Pure: no I/O. Coefficients are stored signed (products positive).

use thiserror::Error;

use super::species::{ELEMENTS, SpeciesDb};

/// A parsed, balanced reaction over species of a [`SpeciesDb`].
#[derive(Debug, Clone, PartialEq)]
pub struct Reaction {
    /// The equation as the user wrote it, trimmed.
    pub text: String,
    /// Species indices in the database, in order of first appearance.
    pub species: Vec<usize>,
    /// Species names as the database spells them (same order).
    pub names: Vec<String>,
    /// Signed stoichiometric coefficients: reactants negative, products positive.
    pub nu: Vec<f64>,
}

impl Reaction {
    /// Δν = Σ ν (moles of gas made per unit extent).
    pub fn delta_nu(&self) -> f64 {
        self.nu.iter().sum()
    }

    /// The coefficient of `name` (0 when the species is not in the reaction).
    pub fn nu_of(&self, name: &str) -> f64 {
        self.names
            .iter()
            .position(|n| n.eq_ignore_ascii_case(name))
            .map_or(0.0, |i| self.nu[i])
    }

    /// The equation in a canonical form, e.g. `CH4 + H2O = CO + 3 H2`.
    pub fn canonical(&self) -> String {
        let side = |sign: f64| {
            let terms: Vec<String> = self
                .names
                .iter()
                .zip(&self.nu)
                .filter(|(_, nu)| **nu * sign > 0.0)
                .map(|(n, nu)| {
                    let c = nu.abs();
                    if (c - 1.0).abs() < 1e-12 {
                        n.clone()
                    } else {
                        format!("{} {n}", trim_float(c))
                    }
                })
                .collect();
            terms.join(" + ")
        };
        format!("{} = {}", side(-1.0), side(1.0))
    }
}

fn trim_float(x: f64) -> String {
    let s = format!("{x:.6}");
    s.trim_end_matches('0').trim_end_matches('.').to_string()
}

/// What is wrong with an equation.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum ReactionError {
    #[error("reaction `{text}`: write it as `reactants = products`, e.g. `N2 + 3 H2 = 2 NH3`")]
    NoEquals { text: String },
    #[error("reaction `{text}`: term `{term}` is not `coefficient species` (e.g. `3 H2`)")]
    BadTerm { text: String, term: String },
    #[error("reaction `{text}`: unknown species `{name}`{hint}")]
    UnknownSpecies {
        text: String,
        name: String,
        hint: String,
    },
    #[error("reaction `{text}` is not balanced: {details}")]
    Unbalanced {
        text: String,
        elements: Vec<String>,
        details: String,
    },
    #[error("reaction `{text}` has no net change (every species cancels)")]
    Empty { text: String },
}

/// "did you mean" text for an unknown species name.
pub fn unknown_hint(db: &SpeciesDb, name: &str) -> String {
    let s = db.suggestions(name);
    if s.is_empty() {
        "; see `eqwatch species` for the known names, or add it in a species file".to_string()
    } else {
        format!("; did you mean {}?", s.join(", "))
    }
}

fn parse_coefficient(s: &str) -> Option<f64> {
    let v = if let Some((a, b)) = s.split_once('/') {
        a.trim().parse::<f64>().ok()? / b.trim().parse::<f64>().ok()?
    } else {
        s.parse::<f64>().ok()?
    };
    (v.is_finite() && v > 0.0).then_some(v)
}

/// Splits a term such as `3 H2`, `3H2`, `0.5 N2`, `1/2 N2` or `NH3`.
fn split_term(term: &str) -> Option<(f64, &str)> {
    let t = term.trim();
    if let Some((c, name)) = t.split_once(char::is_whitespace) {
        let name = name.trim();
        if let Some(c) = parse_coefficient(c) {
            return valid_name(name).then_some((c, name));
        }
        return None;
    }
    let split = t.find(|c: char| c.is_ascii_alphabetic()).unwrap_or(t.len());
    let (c, name) = t.split_at(split);
    let c = if c.is_empty() {
        1.0
    } else {
        parse_coefficient(c)?
    };
    valid_name(name).then_some((c, name))
}

fn valid_name(name: &str) -> bool {
    name.chars().next().is_some_and(|c| c.is_ascii_alphabetic())
        && !name.contains(char::is_whitespace)
}

/// Parses and balances a reaction against `db`.
pub fn parse_reaction(text: &str, db: &SpeciesDb) -> Result<Reaction, ReactionError> {
    let text_t = text.trim();
    let err_text = || text_t.to_string();
    let (lhs, rhs) = ["<=>", "<->", "⇌", "->", "="]
        .iter()
        .find_map(|sep| text_t.split_once(sep))
        .ok_or_else(|| ReactionError::NoEquals { text: err_text() })?;
    let mut species: Vec<usize> = Vec::new();
    let mut nu: Vec<f64> = Vec::new();
    for (side, sign) in [(lhs, -1.0), (rhs, 1.0)] {
        if side.trim().is_empty() {
            return Err(ReactionError::NoEquals { text: err_text() });
        }
        for term in side.split('+') {
            let (c, name) = split_term(term).ok_or_else(|| ReactionError::BadTerm {
                text: err_text(),
                term: term.trim().to_string(),
            })?;
            let idx = db
                .index_of(name)
                .ok_or_else(|| ReactionError::UnknownSpecies {
                    text: err_text(),
                    name: name.to_string(),
                    hint: unknown_hint(db, name),
                })?;
            match species.iter().position(|&s| s == idx) {
                Some(p) => nu[p] += sign * c,
                None => {
                    species.push(idx);
                    nu.push(sign * c);
                }
            }
        }
    }
    // Drop species that cancel out.
    let mut k = 0;
    while k < species.len() {
        if nu[k].abs() < 1e-12 {
            species.remove(k);
            nu.remove(k);
        } else {
            k += 1;
        }
    }
    if species.is_empty() {
        return Err(ReactionError::Empty { text: err_text() });
    }
    let mut elements = Vec::new();
    let mut details = Vec::new();
    for (e, sym) in ELEMENTS.iter().enumerate() {
        let excess: f64 = species
            .iter()
            .zip(&nu)
            .map(|(&s, &n)| n * db.get(s).atoms(e))
            .sum();
        let scale: f64 = species
            .iter()
            .zip(&nu)
            .map(|(&s, &n)| (n * db.get(s).atoms(e)).abs())
            .sum();
        if excess.abs() > 1e-9 * scale.max(1.0) {
            elements.push((*sym).to_string());
            details.push(format!(
                "{sym}: products have {} atoms {} than reactants",
                trim_float(excess.abs()),
                if excess > 0.0 { "more" } else { "fewer" }
            ));
        }
    }
    if !elements.is_empty() {
        return Err(ReactionError::Unbalanced {
            text: err_text(),
            elements,
            details: details.join("; "),
        });
    }
    let names = species.iter().map(|&s| db.get(s).name.clone()).collect();
    Ok(Reaction {
        text: text_t.to_string(),
        species,
        names,
        nu,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn check(text: &str, expected: &[(&str, f64)]) {
        let db = SpeciesDb::builtin();
        let r = parse_reaction(text, &db).unwrap_or_else(|e| panic!("{text}: {e}"));
        assert_eq!(r.species.len(), expected.len(), "{text}");
        for (name, nu) in expected {
            assert!((r.nu_of(name) - nu).abs() < 1e-12, "{text}: {name}");
        }
    }

    #[test]
    fn parses_plant_equations() {
        check(
            "N2 + 3 H2 = 2 NH3",
            &[("N2", -1.0), ("H2", -3.0), ("NH3", 2.0)],
        );
        check(
            "0.5 N2 + 1.5 H2 = NH3",
            &[("N2", -0.5), ("H2", -1.5), ("NH3", 1.0)],
        );
        check(
            "1/2 N2 + 3/2 H2 <=> NH3",
            &[("N2", -0.5), ("H2", -1.5), ("NH3", 1.0)],
        );
        check(
            "CH4+H2O=CO+3H2",
            &[("CH4", -1.0), ("H2O", -1.0), ("CO", 1.0), ("H2", 3.0)],
        );
        check(
            "2 SO2 + O2 ⇌ 2 SO3",
            &[("SO2", -2.0), ("O2", -1.0), ("SO3", 2.0)],
        );
        check(
            "co + h2o = co2 + h2",
            &[("CO", -1.0), ("H2O", -1.0), ("CO2", 1.0), ("H2", 1.0)],
        );
        // A species on both sides is netted.
        check(
            "CO + H2O + H2 = CO2 + 2 H2",
            &[("CO", -1.0), ("H2O", -1.0), ("CO2", 1.0), ("H2", 1.0)],
        );
    }

    #[test]
    fn names_the_unbalanced_element() {
        let db = SpeciesDb::builtin();
        let e = parse_reaction("N2 + H2 = NH3", &db).unwrap_err();
        assert!(
            matches!(&e, ReactionError::Unbalanced { elements, .. } if elements == &["H", "N"]),
            "{e}"
        );
        let e = parse_reaction("CH4 + H2O = CO + 2 H2", &db).unwrap_err();
        assert!(
            e.to_string().contains("H: products have 2 atoms fewer"),
            "{e}"
        );
    }

    #[test]
    fn unknown_species_suggests() {
        let db = SpeciesDb::builtin();
        let e = parse_reaction("CH3 + H2O = CO + 3 H2", &db).unwrap_err();
        assert!(e.to_string().contains("unknown species `CH3`"), "{e}");
        assert!(e.to_string().contains("CH4"), "{e}");
        assert!(matches!(
            parse_reaction("N2 + 3 H2", &db),
            Err(ReactionError::NoEquals { .. })
        ));
        assert!(matches!(
            parse_reaction("N2 + 3 x H2 = 2 NH3", &db),
            Err(ReactionError::BadTerm { .. })
        ));
        assert!(matches!(
            parse_reaction("H2 = H2", &db),
            Err(ReactionError::Empty { .. })
        ));
    }

    #[test]
    fn canonical_form() {
        let db = SpeciesDb::builtin();
        let r = parse_reaction("CH4+H2O=CO+3H2", &db).unwrap();
        assert_eq!(r.canonical(), "CH4 + H2O = CO + 3 H2");
        assert_eq!(r.delta_nu(), 2.0);
    }

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(512))]
        /// Any equation text, and equation-like text: a reaction or an error, never a panic.
        #[test]
        fn any_equation_text_never_panics(
            junk in "\\PC{0,60}",
            shaped in "([0-9./ ]{0,4}[A-Z][a-z]?[0-9]{0,2} ?\\+? ?){0,4}[=<>-]{0,3}( ?[0-9.]{0,3} ?[A-Z][a-z]?[0-9]{0,2} ?\\+?){0,4}",
        ) {
            let db = SpeciesDb::builtin();
            let _ = parse_reaction(&junk, &db);
            let _ = parse_reaction(&shaped, &db);
        }
    }
}
