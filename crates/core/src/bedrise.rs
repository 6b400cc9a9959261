//! The methanator's bed temperature rise against the rise its inlet CO and CO2 would
//! give: the check engineers use for a breakthrough of carbon oxides from upstream (a
//! CO2-removal or shift upset) at a unit whose outlet is kinetically limited, so that its
//! temperature approach means nothing.
//!
//! Pure: species data in, numbers out; no I/O, no clock, no allocation.
//!
//! # Derivation
//! An adiabatic bed converting a small mole fraction y of CO (or CO2) per mole of gas
//! releases y·(−ΔH_r(T)) per mole of gas, which heats that mole by ΔT = y·(−ΔH_r)/c_p,mix.
//! Per 1 mol % converted (y = 0.01):
//!
//! ΔT₁ = 0.01 · (−ΔH_r(T)) / Σ y_i c_p,i(T)
//!
//! with ΔH_r = Σ ν_i H_i(T) of `CO + 3 H2 = CH4 + H2O` and `CO2 + 4 H2 = CH4 + 2 H2O`,
//! H_i and c_p,i from the species' NASA polynomials, at the mean bed temperature, and the
//! mixture of the measured gas. First order: the change of moles (−2 and −2 per mole
//! converted) and of c_p along the bed are neglected, which is within about 1 % at the
//! fractions of a percent a methanator sees. In hydrogen-rich synthesis gas near 300 °C
//! this gives about 73 K per mol % CO and 60 K per mol % CO2 (docs/domain.md §10 [derived]).
//!
//! # References
//! - B. J. McBride, S. Gordon, M. A. Reno, NASA TM-4513 (1993): the species polynomials
//!   (as transcribed in `data/species.toml`).
//! - docs/domain.md §10: the rule of thumb of about 73 K per mol % CO and 60 K per mol % CO2
//!   converted [derived there from NASA data with c_p ≈ 29.8 J/(mol K)].

use crate::thermo::species::SpeciesDb;

/// R, J/(mol K) (CODATA 2018, exact).
const R: f64 = 8.314_462_618;

/// Adiabatic rise per mol % converted, K.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RisePerPercent {
    pub co_k: f64,
    pub co2_k: f64,
    /// The gas heat capacity used, J/(mol K).
    pub cp_j_per_mol_k: f64,
}

/// The rise per mol % of CO and CO2 methanated in `gas` (database index, mole fraction;
/// normalised here) at `t_k`. `None` if a methanation species is missing from the
/// database or the inputs are not physical.
pub fn rise_per_mol_percent(
    db: &SpeciesDb,
    gas: impl Iterator<Item = (usize, f64)>,
    t_k: f64,
) -> Option<RisePerPercent> {
    if !(t_k.is_finite() && t_k > 0.0) {
        return None;
    }
    let (mut cp_sum, mut y_sum) = (0.0, 0.0);
    for (i, y) in gas {
        if !(y.is_finite() && y >= 0.0) {
            return None;
        }
        cp_sum += y * db.get(i).cp_r(t_k);
        y_sum += y;
    }
    if y_sum <= 0.0 {
        return None;
    }
    let cp = R * cp_sum / y_sum;
    let h = |name: &str| db.by_name(name).map(|s| R * t_k * s.h_rt(t_k));
    let (co, co2, h2, ch4, h2o) = (h("CO")?, h("CO2")?, h("H2")?, h("CH4")?, h("H2O")?);
    let dh_co = ch4 + h2o - co - 3.0 * h2;
    let dh_co2 = ch4 + 2.0 * h2o - co2 - 4.0 * h2;
    Some(RisePerPercent {
        co_k: 0.01 * -dh_co / cp,
        co2_k: 0.01 * -dh_co2 / cp,
        cp_j_per_mol_k: cp,
    })
}

/// The bed check of one evaluation.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BedRise {
    pub inlet_k: f64,
    pub outlet_k: f64,
    /// Measured rise, outlet − inlet, K.
    pub rise_k: f64,
    pub per_percent: RisePerPercent,
    /// The rise the configured inlet CO and CO2 would give, K (if configured).
    pub expected_k: Option<f64>,
    /// The inlet carbon oxides the measured rise implies, as mol % CO-equivalent.
    pub implied_co_equivalent_mol_pct: f64,
}

impl BedRise {
    /// From the inlet and outlet temperatures, the rise per mol %, and the configured
    /// inlet CO and CO2 mole fractions.
    pub fn new(
        inlet_k: f64,
        outlet_k: f64,
        per_percent: RisePerPercent,
        inlet_co_co2: Option<(f64, f64)>,
    ) -> Self {
        let rise_k = outlet_k - inlet_k;
        Self {
            inlet_k,
            outlet_k,
            rise_k,
            per_percent,
            expected_k: inlet_co_co2
                .map(|(co, co2)| 100.0 * (co * per_percent.co_k + co2 * per_percent.co2_k)),
            implied_co_equivalent_mol_pct: rise_k / per_percent.co_k,
        }
    }

    /// How much more the bed rose than the configured inlet would explain, K.
    pub fn excess_k(&self) -> Option<f64> {
        self.expected_k.map(|e| self.rise_k - e)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn gas(db: &SpeciesDb) -> Vec<(usize, f64)> {
        // Invented methanator inlet gas (dry, hydrogen-rich synthesis gas), wet with 0.4 %.
        [
            ("H2", 0.741),
            ("N2", 0.244),
            ("CH4", 0.0075),
            ("Ar", 0.0035),
            ("H2O", 0.004),
        ]
        .iter()
        .map(|(n, y)| (db.index_of(n).expect("species"), *y))
        .collect()
    }

    #[test]
    fn about_73_k_per_percent_co_and_60_k_per_percent_co2() {
        // docs/domain.md §10 [derived]: ~73 K per mol % CO and ~60 K per mol % CO2 near 300 °C with
        // c_p ≈ 29.8 J/(mol K). Our c_p of this gas from the NASA data differs a little from
        // that round figure, so the check is to 3 %.
        let db = SpeciesDb::builtin();
        let r = rise_per_mol_percent(&db, gas(&db).into_iter(), 573.15).expect("rise");
        assert!(
            (r.cp_j_per_mol_k - 29.8).abs() < 0.8,
            "cp {}",
            r.cp_j_per_mol_k
        );
        assert!((r.co_k / 73.0 - 1.0).abs() < 0.03, "CO {} K", r.co_k);
        assert!((r.co2_k / 60.0 - 1.0).abs() < 0.03, "CO2 {} K", r.co2_k);
        // ΔH of CO methanation at 573 K: −216 to −218 kJ/mol (JANAF-based values quoted in
        // methanation literature, from memory): the CO figure times c_p / 0.01.
        let dh = r.co_k * r.cp_j_per_mol_k / 0.01;
        assert!((dh - 217_000.0).abs() < 2_000.0, "ΔH {dh}");
    }

    #[test]
    fn expected_excess_and_implied_inlet() {
        let db = SpeciesDb::builtin();
        let r = rise_per_mol_percent(&db, gas(&db).into_iter(), 590.0).expect("rise");
        // Invented: 0.18 % CO and 0.05 % CO2 at the inlet; the bed rose 40 K.
        let b = BedRise::new(560.0, 600.0, r, Some((0.0018, 0.0005)));
        let expected = 0.18 * r.co_k + 0.05 * r.co2_k;
        assert!((b.expected_k.unwrap() - expected).abs() < 1e-9);
        assert!((b.excess_k().unwrap() - (40.0 - expected)).abs() < 1e-9);
        assert!((b.implied_co_equivalent_mol_pct - 40.0 / r.co_k).abs() < 1e-12);
        assert!(rise_per_mol_percent(&db, std::iter::empty(), 590.0).is_none());
        assert!(rise_per_mol_percent(&db, gas(&db).into_iter(), f64::NAN).is_none());
    }
}
