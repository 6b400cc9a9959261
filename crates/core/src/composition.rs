//! Analyser compositions: parsing `H2=60,N2=20,CO=5ppm`, units per component,
//! wet or dry basis, water from a steam-to-dry-gas ratio or a water measurement,
//! and the sum-to-100 check (normalise only inside the tolerance).
//!
//! Pure: no I/O. Every error names the species, the unit or the sum to fix.

use thiserror::Error;

use crate::thermo::reaction::unknown_hint;
use crate::thermo::species::SpeciesDb;
use crate::units::{CompositionUnit, UnitError, split_quantity};

/// Analyser basis: wet (as the gas is) or dry (water knocked out before analysis).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Basis {
    Wet,
    Dry,
}

impl Basis {
    pub fn parse(s: &str) -> Option<Self> {
        match s.trim().to_ascii_lowercase().as_str() {
            "wet" => Some(Self::Wet),
            "dry" => Some(Self::Dry),
            _ => None,
        }
    }
    pub fn as_str(self) -> &'static str {
        match self {
            Self::Wet => "wet",
            Self::Dry => "dry",
        }
    }
}

/// Where the water of a dry-basis analysis comes from.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum WaterSource {
    /// Mol H2O per mol dry gas.
    SteamRatio(f64),
    /// Water mole fraction of the wet gas (e.g. a moisture analyser).
    WetFraction(f64),
}

#[derive(Debug, Clone, PartialEq, Error)]
pub enum CompositionError {
    #[error("composition: `{item}` is not `species=value[unit]` (e.g. `H2=60` or `CO=5ppm`)")]
    BadItem { item: String },
    #[error("composition: {species}: {source}")]
    BadValue { species: String, source: UnitError },
    #[error(
        "composition: {species} = {value} is not a valid amount (must be a finite number, zero or more)"
    )]
    NotPhysical { species: String, value: f64 },
    #[error("composition: unknown species `{name}`{hint}")]
    UnknownSpecies { name: String, hint: String },
    #[error("composition: {species} is given twice")]
    Duplicate { species: String },
    #[error("composition: no components given")]
    Empty,
    #[error(
        "composition ({basis} basis) sums to {sum_percent:.3} mol%, outside 100 ± {tolerance_percent} mol%; check the analyser, the units, or add the missing components"
    )]
    Sum {
        basis: &'static str,
        sum_percent: f64,
        tolerance_percent: f64,
    },
    #[error(
        "a dry-basis analysis needs its water: give a steam-to-dry-gas ratio or a water measurement"
    )]
    DryWithoutWater,
    #[error(
        "H2O is on a dry-basis analysis; give water as a steam ratio or a water measurement instead"
    )]
    WaterOnDryBasis,
    #[error("steam-to-dry-gas ratio {0} must be a finite number above zero")]
    BadSteamRatio(f64),
    #[error("water fraction {0} must be between 0 and 1 (exclusive)")]
    BadWater(f64),
    #[error("water is given twice (steam ratio and water measurement); give one")]
    WaterTwice,
    #[error(
        "a wet-basis analysis already contains its water; steam ratio or water measurement apply to dry basis only"
    )]
    WaterOnWetBasis,
    #[error("the species file has no H2O, which a dry-basis analysis needs")]
    NoWaterSpecies,
}

/// One analysed component as the analyser reports it.
#[derive(Debug, Clone, PartialEq)]
pub struct Component {
    pub species: String,
    pub value: f64,
    pub unit: CompositionUnit,
}

/// Parses `H2=60,N2=20,CO=5ppm` with `default_unit` where a value has no unit.
pub fn parse_components(
    text: &str,
    default_unit: CompositionUnit,
) -> Result<Vec<Component>, CompositionError> {
    let mut out = Vec::new();
    for item in text
        .split([',', ';'])
        .map(str::trim)
        .filter(|s| !s.is_empty())
    {
        let (name, value) =
            item.split_once(['=', ':'])
                .ok_or_else(|| CompositionError::BadItem {
                    item: item.to_string(),
                })?;
        let name = name.trim();
        if name.is_empty() {
            return Err(CompositionError::BadItem {
                item: item.to_string(),
            });
        }
        let (v, unit) = split_quantity("composition value", value).map_err(|source| {
            CompositionError::BadValue {
                species: name.to_string(),
                source,
            }
        })?;
        let unit = if unit.is_empty() {
            default_unit
        } else {
            CompositionUnit::parse(unit).map_err(|source| CompositionError::BadValue {
                species: name.to_string(),
                source,
            })?
        };
        out.push(Component {
            species: name.to_string(),
            value: v,
            unit,
        });
    }
    if out.is_empty() {
        return Err(CompositionError::Empty);
    }
    Ok(out)
}

/// A composition on the wet basis, ready for Q.
#[derive(Debug, Clone, PartialEq)]
pub struct WetComposition {
    /// Database indices, in the analyser's order (then H2O if it was added).
    pub species: Vec<usize>,
    /// Wet mole fractions, summing to 1.
    pub y: Vec<f64>,
    /// Sum of the analysed components before normalising, as a fraction (1.0 = 100 %).
    pub analysed_sum: f64,
    /// Steam-to-dry-gas ratio used to add water (dry basis only).
    pub steam_ratio: Option<f64>,
    /// Index of H2O in `species` when water was added from outside the analysis.
    pub added_water: Option<usize>,
}

/// Converts an analysis to wet mole fractions. `sum_tolerance` is a fraction
/// (0.02 = the components may sum to 100 ± 2 mol%); inside it the analysis is
/// normalised, outside it is refused.
pub fn to_wet(
    db: &SpeciesDb,
    components: &[Component],
    basis: Basis,
    water: Option<WaterSource>,
    sum_tolerance: f64,
) -> Result<WetComposition, CompositionError> {
    if components.is_empty() {
        return Err(CompositionError::Empty);
    }
    let mut species = Vec::with_capacity(components.len() + 1);
    let mut y = Vec::with_capacity(components.len() + 1);
    for c in components {
        let idx = db
            .index_of(&c.species)
            .ok_or_else(|| CompositionError::UnknownSpecies {
                name: c.species.clone(),
                hint: unknown_hint(db, &c.species),
            })?;
        if species.contains(&idx) {
            return Err(CompositionError::Duplicate {
                species: db.get(idx).name.clone(),
            });
        }
        if !(c.value.is_finite() && c.value >= 0.0) {
            return Err(CompositionError::NotPhysical {
                species: c.species.clone(),
                value: c.value,
            });
        }
        species.push(idx);
        y.push(c.value * c.unit.fraction_per_unit());
    }
    let sum: f64 = y.iter().sum();
    let tol = sum_tolerance.max(0.0);
    if sum.is_nan() || (sum - 1.0).abs() > tol {
        return Err(CompositionError::Sum {
            basis: basis.as_str(),
            sum_percent: sum * 100.0,
            tolerance_percent: tol * 100.0,
        });
    }
    for v in &mut y {
        *v /= sum;
    }
    let water_idx = db.index_of("H2O");
    match basis {
        Basis::Wet => {
            if water.is_some() {
                return Err(CompositionError::WaterOnWetBasis);
            }
            Ok(WetComposition {
                species,
                y,
                analysed_sum: sum,
                steam_ratio: None,
                added_water: None,
            })
        }
        Basis::Dry => {
            let w = water_idx.ok_or(CompositionError::NoWaterSpecies)?;
            if species.contains(&w) {
                return Err(CompositionError::WaterOnDryBasis);
            }
            let s = match water {
                None => return Err(CompositionError::DryWithoutWater),
                Some(WaterSource::SteamRatio(s)) => {
                    if !(s.is_finite() && s > 0.0) {
                        return Err(CompositionError::BadSteamRatio(s));
                    }
                    s
                }
                Some(WaterSource::WetFraction(f)) => {
                    if !(f.is_finite() && f > 0.0 && f < 1.0) {
                        return Err(CompositionError::BadWater(f));
                    }
                    f / (1.0 - f)
                }
            };
            for v in &mut y {
                *v /= 1.0 + s;
            }
            species.push(w);
            y.push(s / (1.0 + s));
            let at = species.len() - 1;
            Ok(WetComposition {
                species,
                y,
                analysed_sum: sum,
                steam_ratio: Some(s),
                added_water: Some(at),
            })
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_components_with_units() {
        let c = parse_components(
            "H2=60, N2=20,CO=5ppm;CO2 = 0.1 mol%",
            CompositionUnit::Percent,
        )
        .unwrap();
        assert_eq!(c.len(), 4);
        assert_eq!(c[2].unit, CompositionUnit::Ppm);
        assert_eq!(c[3].value, 0.1);
        assert!(parse_components("H2 60", CompositionUnit::Percent).is_err());
        assert!(parse_components("H2=lots", CompositionUnit::Percent).is_err());
        assert!(parse_components("H2=5 mol-%", CompositionUnit::Percent).is_err());
        assert!(parse_components("", CompositionUnit::Percent).is_err());
    }

    #[test]
    fn dry_basis_with_steam_ratio() {
        // docs/domain.md §8 LTS example: dry H2 61.0536, N2 18.98637, CO 0.28697, CO2 19.38096,
        // CH4 0.2921 mol%, S/D 0.36312: wet y = dry y / (1 + S/D), water S/D/(1 + S/D).
        let db = SpeciesDb::builtin();
        let c = parse_components(
            "H2=61.0536,N2=18.98637,CO=0.28697,CO2=19.38096,CH4=0.2921",
            CompositionUnit::Percent,
        )
        .unwrap();
        let w = to_wet(
            &db,
            &c,
            Basis::Dry,
            Some(WaterSource::SteamRatio(0.36312)),
            0.02,
        )
        .unwrap();
        let s: f64 = w.y.iter().sum();
        assert!((s - 1.0).abs() < 1e-15);
        let h2o = w.y[w.added_water.unwrap()];
        assert!((h2o - 0.36312 / 1.36312).abs() < 1e-15);
        // Water from a moisture measurement gives the same gas.
        let w2 = to_wet(
            &db,
            &c,
            Basis::Dry,
            Some(WaterSource::WetFraction(0.36312 / 1.36312)),
            0.02,
        )
        .unwrap();
        for (a, b) in w.y.iter().zip(&w2.y) {
            assert!((a - b).abs() < 1e-15);
        }
    }

    #[test]
    fn refusals_name_what_to_fix() {
        let db = SpeciesDb::builtin();
        let p = |t: &str| parse_components(t, CompositionUnit::Percent).unwrap();
        let e = to_wet(&db, &p("H2=60,N2=20,NH3=10"), Basis::Wet, None, 0.02).unwrap_err();
        assert!(e.to_string().contains("sums to 90.000 mol%"), "{e}");
        let e = to_wet(&db, &p("H2=60,N2=20,NH4=20"), Basis::Wet, None, 0.02).unwrap_err();
        assert!(e.to_string().contains("NH3"), "{e}");
        let e = to_wet(&db, &p("H2=80,N2=-20,NH3=40"), Basis::Wet, None, 0.02).unwrap_err();
        assert!(matches!(e, CompositionError::NotPhysical { .. }), "{e}");
        let e = to_wet(&db, &p("H2=80,CO2=20"), Basis::Dry, None, 0.02).unwrap_err();
        assert_eq!(e, CompositionError::DryWithoutWater);
        let e = to_wet(
            &db,
            &p("H2=80,H2O=20"),
            Basis::Dry,
            Some(WaterSource::SteamRatio(0.3)),
            0.02,
        )
        .unwrap_err();
        assert_eq!(e, CompositionError::WaterOnDryBasis);
        let e = to_wet(&db, &p("H2=80,h2=20"), Basis::Wet, None, 0.02).unwrap_err();
        assert!(matches!(e, CompositionError::Duplicate { .. }), "{e}");
        let e = to_wet(
            &db,
            &p("H2=80,CO2=20"),
            Basis::Dry,
            Some(WaterSource::SteamRatio(-1.0)),
            0.02,
        )
        .unwrap_err();
        assert!(matches!(e, CompositionError::BadSteamRatio(_)), "{e}");
        // Inside tolerance: normalised.
        let w = to_wet(&db, &p("H2=60,N2=20,NH3=19"), Basis::Wet, None, 0.02).unwrap();
        assert!((w.analysed_sum - 0.99).abs() < 1e-12);
        assert!((w.y[0] - 60.0 / 99.0).abs() < 1e-15);
    }
}
