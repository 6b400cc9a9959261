//! K(T): the equilibrium constant of a reaction from species data or from a named
//! published correlation, on the 1 bar ideal-gas standard state.
//!
//! A [`KModel`] is compiled once per reaction and evaluated without allocation:
//! for species data the stoichiometric sums of the NASA coefficients are formed per
//! temperature segment, so ln K(T) costs one polynomial and one logarithm.
//! ΔH°, ΔS°, ΔG° come from exact polynomial integrals (no constant-ΔH shortcut);
//! for correlations they follow from ln K(T) and its analytic derivative
//! (ΔH° = R T² d ln K/dT, van 't Hoff).
//!
//! # References
//! - Moe, Chem. Eng. Prog. 58(3) (1962) 33: K = exp(4577.8/T − 4.33), shift.
//! - Xu & Froment, AIChE J. 35 (1989) 88: reforming K = exp(−26830/T + 30.114) bar²,
//!   shift K = exp(4400/T − 4.036).
//! - Gillespie & Beattie, Phys. Rev. 36 (1930) 743: ammonia, K in atm⁻¹ on fugacities.
//! - Graaf, Sijtsema, Stamhuis, Joosten, Chem. Eng. Sci. 41 (1986) 2883: methanol, bar⁻².
//! - Unit change: with K_atm = Π(f_i/1 atm)^ν, K_bar = Π(f_i/1 bar)^ν = K_atm·1.01325^Δν.

use std::f64::consts::LN_10;

use thiserror::Error;

use super::reaction::{Reaction, parse_reaction};
use super::species::{R_J_PER_MOL_K, SpeciesDb, g_rt, h_rt, s_r};
use crate::units::STANDARD_ATMOSPHERE_BAR;

/// Where a K value comes from. The id travels with every number.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum KSourceId {
    /// ΔG° from the species' polynomials (built-in or user species files).
    SpeciesData,
    Moe1962,
    XuFroment1989,
    GillespieBeattie1930,
    Graaf1986,
    /// ln K = a ln T + b/T + c + d T + e T² + f T³ given by the user.
    UserPolynomial,
}

impl KSourceId {
    pub const ALL: [KSourceId; 6] = [
        KSourceId::SpeciesData,
        KSourceId::Moe1962,
        KSourceId::XuFroment1989,
        KSourceId::GillespieBeattie1930,
        KSourceId::Graaf1986,
        KSourceId::UserPolynomial,
    ];

    pub fn as_str(self) -> &'static str {
        match self {
            Self::SpeciesData => "species-data",
            Self::Moe1962 => "moe-1962",
            Self::XuFroment1989 => "xu-froment-1989",
            Self::GillespieBeattie1930 => "gillespie-beattie-1930",
            Self::Graaf1986 => "graaf-1986",
            Self::UserPolynomial => "user-polynomial",
        }
    }

    pub fn parse(s: &str) -> Result<Self, KSourceError> {
        Self::ALL
            .into_iter()
            .find(|k| k.as_str().eq_ignore_ascii_case(s.trim()))
            .ok_or_else(|| KSourceError::Unknown { id: s.to_string() })
    }

    pub fn citation(self) -> &'static str {
        match self {
            Self::SpeciesData => {
                "NASA polynomials (McBride, Gordon & Reno, NASA TM-4513, 1993, unless a species file overrides)"
            }
            Self::Moe1962 => "Moe, Chem. Eng. Prog. 58(3) (1962) 33",
            Self::XuFroment1989 => "Xu & Froment, AIChE J. 35 (1989) 88",
            Self::GillespieBeattie1930 => "Gillespie & Beattie, Phys. Rev. 36 (1930) 743",
            Self::Graaf1986 => "Graaf et al., Chem. Eng. Sci. 41 (1986) 2883",
            Self::UserPolynomial => "user-supplied polynomial",
        }
    }
}

/// Problems choosing or building a K source.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum KSourceError {
    #[error(
        "unknown K source `{id}`; expected one of species-data, moe-1962, xu-froment-1989, gillespie-beattie-1930, graaf-1986, user-polynomial"
    )]
    Unknown { id: String },
    #[error("K source {id} does not describe `{reaction}`; it covers: {covers}")]
    WrongReaction {
        id: &'static str,
        reaction: String,
        covers: String,
    },
    #[error("species {species} has no polynomial data")]
    NoData { species: String },
    #[error("user polynomial: {0}")]
    BadPolynomial(String),
}

/// Standard pressure a correlation's K refers to.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum StandardPressure {
    Bar,
    Atm,
}

/// ln K = a ln T + b/T + c + d T + e T² + f T³ (natural log), on `standard`, for
/// `reaction` as written, valid on `[t_min_k, t_max_k]`.
#[derive(Debug, Clone, PartialEq)]
pub struct UserPolynomial {
    pub reaction: String,
    pub a: f64,
    pub b: f64,
    pub c: f64,
    pub d: f64,
    pub e: f64,
    pub f: f64,
    pub standard: StandardPressure,
    pub t_min_k: f64,
    pub t_max_k: f64,
}

/// ln K as the 6-term form above, plus a fixed offset, scaled by `scale`.
#[derive(Debug, Clone, Copy, PartialEq)]
struct Poly6 {
    a: f64,
    b: f64,
    c: f64,
    d: f64,
    e: f64,
    f: f64,
}

impl Poly6 {
    #[inline]
    fn ln_k(&self, t: f64, ln_t: f64) -> f64 {
        self.a * ln_t + self.b / t + self.c + t * (self.d + t * (self.e + t * self.f))
    }
    #[inline]
    fn d_ln_k_dt(&self, t: f64) -> f64 {
        self.a / t - self.b / (t * t) + self.d + t * (2.0 * self.e + 3.0 * t * self.f)
    }
    fn scaled(self, s: f64) -> Self {
        Self {
            a: self.a * s,
            b: self.b * s,
            c: self.c * s,
            d: self.d * s,
            e: self.e * s,
            f: self.f * s,
        }
    }
}

/// One temperature segment of the stoichiometric NASA sum Σ ν_i c_i.
#[derive(Debug, Clone, Copy, PartialEq)]
struct Segment {
    t_max_k: f64,
    c: [f64; 9],
}

#[derive(Debug, Clone, PartialEq)]
enum Form {
    Species { segments: Vec<Segment> },
    Correlation { poly: Poly6 },
}

/// A compiled K(T) for one reaction as written.
#[derive(Debug, Clone, PartialEq)]
pub struct KModel {
    id: KSourceId,
    form: Form,
    /// Range over which the data or correlation are valid (outside: flagged).
    valid_min_k: f64,
    valid_max_k: f64,
    /// Where a temperature search may look (wider than validity for correlations).
    search_min_k: f64,
    search_max_k: f64,
    citation: String,
}

/// A published correlation: canonical reaction, ln K in its own units, validity.
struct Published {
    id: KSourceId,
    equation: &'static str,
    poly: Poly6,
    standard: StandardPressure,
    valid: (f64, f64),
    note: &'static str,
}

fn log10_poly(a_log10_t: f64, b: f64, c: f64, d: f64, e: f64) -> Poly6 {
    // log10 K = A log10 T + B/T + C + D T + E T²  ->  ln K = A ln T + ln10 (B/T + C + D T + E T²)
    Poly6 {
        a: a_log10_t,
        b: b * LN_10,
        c: c * LN_10,
        d: d * LN_10,
        e: e * LN_10,
        f: 0.0,
    }
}

fn published() -> Vec<Published> {
    let exp_form = |b: f64, c: f64| Poly6 {
        a: 0.0,
        b,
        c,
        d: 0.0,
        e: 0.0,
        f: 0.0,
    };
    vec![
        Published {
            id: KSourceId::Moe1962,
            equation: "CO + H2O = CO2 + H2",
            poly: exp_form(4577.8, -4.33),
            standard: StandardPressure::Bar,
            // Validity is not stated with the formula as we hold it; the span of
            // shift converters (LTS to HTS) is used [common practice].
            valid: (400.0, 1000.0),
            note: "validity 400-1000 K assumed (shift converters, common practice)",
        },
        Published {
            id: KSourceId::XuFroment1989,
            equation: "CO + H2O = CO2 + H2",
            poly: exp_form(4400.0, -4.036),
            standard: StandardPressure::Bar,
            valid: (400.0, 1300.0),
            note: "validity 400-1300 K assumed (reformer and shift service, common practice)",
        },
        Published {
            id: KSourceId::XuFroment1989,
            equation: "CH4 + H2O = CO + 3 H2",
            poly: exp_form(-26830.0, 30.114),
            standard: StandardPressure::Bar,
            valid: (600.0, 1300.0),
            note: "K in bar^2; validity 600-1300 K assumed (reformer service, common practice)",
        },
        Published {
            id: KSourceId::XuFroment1989,
            // Product of the two above (K3 = K1 K2), as Xu & Froment use it.
            equation: "CH4 + 2 H2O = CO2 + 4 H2",
            poly: exp_form(-26830.0 + 4400.0, 30.114 - 4.036),
            standard: StandardPressure::Bar,
            valid: (600.0, 1300.0),
            note: "K in bar^2, product of reforming and shift; validity 600-1300 K assumed",
        },
        Published {
            id: KSourceId::GillespieBeattie1930,
            equation: "0.5 N2 + 1.5 H2 = NH3",
            // The T² coefficient is 1.848863e-7 (an e-5 misprint circulates).
            poly: log10_poly(-2.691122, 2001.6, 2.6899, -5.519265e-5, 1.848863e-7),
            standard: StandardPressure::Atm,
            // Fitted to Larson-Dodge data at 325-500 degC (from memory); flagged outside.
            valid: (598.15, 773.15),
            note: "K in atm^-1 on fugacities, converted to 1 bar; validity 325-500 degC (from memory)",
        },
        Published {
            id: KSourceId::Graaf1986,
            equation: "CO2 + 3 H2 = CH3OH + H2O",
            poly: log10_poly(0.0, 3066.0, -10.592, 0.0, 0.0),
            standard: StandardPressure::Bar,
            // Methanol synthesis conditions of the study, 473-548 K (from memory).
            valid: (450.0, 600.0),
            note: "K in bar^-2; validity about 450-600 K (from memory)",
        },
        Published {
            id: KSourceId::Graaf1986,
            equation: "CO + 2 H2 = CH3OH",
            poly: log10_poly(0.0, 5139.0, -12.621, 0.0, 0.0),
            standard: StandardPressure::Bar,
            valid: (450.0, 600.0),
            note: "K in bar^-2; validity about 450-600 K (from memory)",
        },
    ]
}

/// If `r` is `scale` times `base` (same species, proportional coefficients), the scale.
fn proportional(r: &Reaction, base: &Reaction) -> Option<f64> {
    if r.species.len() != base.species.len() {
        return None;
    }
    let i0 = r.species.iter().position(|s| *s == base.species[0])?;
    let scale = r.nu[i0] / base.nu[0];
    for (s, nu) in base.species.iter().zip(&base.nu) {
        let i = r.species.iter().position(|x| x == s)?;
        if (r.nu[i] - scale * nu).abs() > 1e-9 * nu.abs().max(1.0) {
            return None;
        }
    }
    Some(scale)
}

impl KModel {
    /// K from species data: ΔG°(T) = Σ ν_i G°_i(T), exact polynomial integrals.
    pub fn from_species(reaction: &Reaction, db: &SpeciesDb) -> Result<Self, KSourceError> {
        // Union of every species' range boundaries: the segments.
        let mut bounds: Vec<f64> = Vec::new();
        let mut valid_min = f64::NEG_INFINITY;
        let mut valid_max = f64::INFINITY;
        for &s in &reaction.species {
            let sp = db.get(s);
            if sp.ranges.is_empty() {
                return Err(KSourceError::NoData {
                    species: sp.name.clone(),
                });
            }
            valid_min = valid_min.max(sp.t_min_k());
            valid_max = valid_max.min(sp.t_max_k());
            for r in &sp.ranges {
                bounds.push(r.t_max_k);
            }
        }
        bounds.sort_by(f64::total_cmp);
        bounds.dedup_by(|a, b| (*a - *b).abs() < 1e-9);
        // The last segment extends (extrapolates) beyond the highest bound.
        if let Some(last) = bounds.last_mut() {
            *last = f64::INFINITY;
        }
        let mut segments = Vec::with_capacity(bounds.len());
        let mut lo = 0.0;
        for &hi in &bounds {
            // A temperature strictly inside (lo, hi) picks each species' range.
            let probe = if hi.is_finite() {
                0.5 * (lo + hi)
            } else {
                lo + 1.0
            };
            let mut c = [0.0; 9];
            for (&s, &nu) in reaction.species.iter().zip(&reaction.nu) {
                let rc = db.get(s).range_at(probe).c;
                for k in 0..9 {
                    c[k] += nu * rc[k];
                }
            }
            segments.push(Segment { t_max_k: hi, c });
            lo = hi;
        }
        let sources: Vec<&str> = {
            let mut v: Vec<&str> = reaction
                .species
                .iter()
                .map(|&s| db.get(s).source.as_str())
                .collect();
            v.sort_unstable();
            v.dedup();
            v
        };
        Ok(Self {
            id: KSourceId::SpeciesData,
            form: Form::Species { segments },
            valid_min_k: valid_min,
            valid_max_k: valid_max,
            search_min_k: valid_min,
            search_max_k: valid_max,
            citation: sources.join("; "),
        })
    }

    /// K from a named correlation, for `reaction` if the correlation describes it
    /// (any multiple or the reverse of its equation).
    pub fn from_correlation(
        id: KSourceId,
        reaction: &Reaction,
        db: &SpeciesDb,
    ) -> Result<Self, KSourceError> {
        if id == KSourceId::SpeciesData {
            return Self::from_species(reaction, db);
        }
        if id == KSourceId::UserPolynomial {
            return Err(KSourceError::BadPolynomial(
                "give the coefficients (a user polynomial is built with KModel::from_user_polynomial)".into(),
            ));
        }
        let table = published();
        let mut covers = Vec::new();
        for p in table.iter().filter(|p| p.id == id) {
            covers.push(p.equation);
            // The table's equations use built-in species names; a user file that
            // removes one of them simply makes the correlation unusable.
            let Ok(base) = parse_reaction(p.equation, db) else {
                continue;
            };
            if let Some(scale) = proportional(reaction, &base) {
                return Ok(Self::correlation(
                    id,
                    p.poly,
                    p.standard,
                    base.delta_nu(),
                    scale,
                    p.valid,
                    p.note,
                ));
            }
        }
        Err(KSourceError::WrongReaction {
            id: id.as_str(),
            reaction: reaction.canonical(),
            covers: covers.join("; "),
        })
    }

    /// K from a user polynomial (its own equation must match `reaction` up to a multiple).
    pub fn from_user_polynomial(
        p: &UserPolynomial,
        reaction: &Reaction,
        db: &SpeciesDb,
    ) -> Result<Self, KSourceError> {
        let base = parse_reaction(&p.reaction, db)
            .map_err(|e| KSourceError::BadPolynomial(e.to_string()))?;
        let coeffs = [p.a, p.b, p.c, p.d, p.e, p.f];
        if coeffs.iter().any(|c| !c.is_finite()) {
            return Err(KSourceError::BadPolynomial(
                "coefficients must be finite numbers".into(),
            ));
        }
        if !(p.t_min_k > 0.0 && p.t_max_k > p.t_min_k) {
            return Err(KSourceError::BadPolynomial(
                "t_min_k < t_max_k, both in K, are needed".into(),
            ));
        }
        let scale = proportional(reaction, &base).ok_or_else(|| KSourceError::WrongReaction {
            id: KSourceId::UserPolynomial.as_str(),
            reaction: reaction.canonical(),
            covers: base.canonical(),
        })?;
        let poly = Poly6 {
            a: p.a,
            b: p.b,
            c: p.c,
            d: p.d,
            e: p.e,
            f: p.f,
        };
        Ok(Self::correlation(
            KSourceId::UserPolynomial,
            poly,
            p.standard,
            base.delta_nu(),
            scale,
            (p.t_min_k, p.t_max_k),
            "user polynomial",
        ))
    }

    fn correlation(
        id: KSourceId,
        poly: Poly6,
        standard: StandardPressure,
        delta_nu: f64,
        scale: f64,
        valid: (f64, f64),
        note: &str,
    ) -> Self {
        let mut poly = poly;
        if standard == StandardPressure::Atm {
            // K_bar = K_atm · 1.01325^Δν (see module docs).
            poly.c += delta_nu * STANDARD_ATMOSPHERE_BAR.ln();
        }
        Self {
            id,
            form: Form::Correlation {
                poly: poly.scaled(scale),
            },
            valid_min_k: valid.0,
            valid_max_k: valid.1,
            search_min_k: 200.0,
            search_max_k: 2500.0,
            citation: format!("{} ({note})", id.citation()),
        }
    }

    pub fn id(&self) -> KSourceId {
        self.id
    }

    pub fn citation(&self) -> &str {
        &self.citation
    }

    /// Temperatures over which the data or correlation hold.
    pub fn valid_range_k(&self) -> (f64, f64) {
        (self.valid_min_k, self.valid_max_k)
    }

    /// Where an equilibrium-temperature search may look.
    pub fn search_range_k(&self) -> (f64, f64) {
        (self.search_min_k, self.search_max_k)
    }

    pub fn in_range(&self, t: f64) -> bool {
        t >= self.valid_min_k && t <= self.valid_max_k
    }

    #[inline]
    fn segment(&self, segments: &[Segment], t: f64) -> [f64; 9] {
        for s in segments {
            if t <= s.t_max_k {
                return s.c;
            }
        }
        segments[segments.len() - 1].c
    }

    /// ln K at `t` kelvin (1 bar standard state, dimensionless K).
    #[inline]
    pub fn ln_k(&self, t: f64) -> f64 {
        let ln_t = t.ln();
        match &self.form {
            Form::Species { segments } => -g_rt(&self.segment(segments, t), t, ln_t),
            Form::Correlation { poly } => poly.ln_k(t, ln_t),
        }
    }

    /// d ln K / dT = ΔH°/(R T²), per kelvin.
    #[inline]
    pub fn d_ln_k_dt(&self, t: f64) -> f64 {
        match &self.form {
            Form::Species { segments } => h_rt(&self.segment(segments, t), t, t.ln()) / t,
            Form::Correlation { poly } => poly.d_ln_k_dt(t),
        }
    }

    /// ln K and d ln K/dT together (one segment look-up, one logarithm).
    #[inline]
    pub fn ln_k_and_slope(&self, t: f64) -> (f64, f64) {
        let ln_t = t.ln();
        match &self.form {
            Form::Species { segments } => {
                let c = self.segment(segments, t);
                let h = h_rt(&c, t, ln_t);
                (-(h - s_r(&c, t, ln_t)), h / t)
            }
            Form::Correlation { poly } => (poly.ln_k(t, ln_t), poly.d_ln_k_dt(t)),
        }
    }

    /// Standard reaction properties at `t`.
    pub fn properties(&self, t: f64) -> ReactionProperties {
        let (ln_k, slope) = self.ln_k_and_slope(t);
        let delta_g = -R_J_PER_MOL_K * t * ln_k;
        let delta_h = R_J_PER_MOL_K * t * t * slope;
        ReactionProperties {
            ln_k,
            delta_g_j_per_mol: delta_g,
            delta_h_j_per_mol: delta_h,
            delta_s_j_per_mol_k: (delta_h - delta_g) / t,
            d_ln_k_dt_per_k: slope,
        }
    }
}

/// Standard-state properties of a reaction at one temperature (per mol of reaction as written).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ReactionProperties {
    pub ln_k: f64,
    pub delta_g_j_per_mol: f64,
    pub delta_h_j_per_mol: f64,
    pub delta_s_j_per_mol_k: f64,
    pub d_ln_k_dt_per_k: f64,
}

#[cfg(test)]
mod tests {
    use super::*;

    fn model(eq: &str, id: KSourceId) -> KModel {
        let db = SpeciesDb::builtin();
        let r = parse_reaction(eq, &db).unwrap();
        KModel::from_correlation(id, &r, &db).unwrap()
    }

    /// Relative check helper: |got/expected − 1| ≤ rel.
    fn check(got: f64, expected: f64, rel: f64, what: &str) {
        assert!(
            (got / expected - 1.0).abs() <= rel,
            "{what}: got {got}, expected {expected} (rel tol {rel})"
        );
    }

    #[test]
    fn correlations_reproduce_their_check_values() {
        // docs/domain.md §3 [derived from the published formulas; recomputed here from the formula]:
        // Moe K(700) = 9.11, K(1000) = 1.28 (quoted to 3 figures).
        let moe = model("CO + H2O = CO2 + H2", KSourceId::Moe1962);
        check(
            moe.ln_k(700.0).exp(),
            (4577.8f64 / 700.0 - 4.33).exp(),
            1e-14,
            "moe 700 formula",
        );
        check(moe.ln_k(700.0).exp(), 9.11, 5e-3, "moe 700");
        check(moe.ln_k(1000.0).exp(), 1.28, 5e-3, "moe 1000");
        // Xu & Froment reforming K(1069.15 K) = 151.305 bar² [derived].
        let xf = model("CH4 + H2O = CO + 3 H2", KSourceId::XuFroment1989);
        check(
            xf.ln_k(1069.15).exp(),
            151.305,
            1e-5,
            "xu-froment reforming",
        );
        // Gillespie-Beattie K(723.15 K) = 0.0066074 atm^-1 [derived]; on 1 bar:
        // K_bar = K_atm · 1.01325^Δν with Δν = −1.
        let gb = model("0.5 N2 + 1.5 H2 = NH3", KSourceId::GillespieBeattie1930);
        check(
            gb.ln_k(723.15).exp(),
            0.0066074 / 1.01325,
            1e-4,
            "gillespie-beattie",
        );
        // Graaf 1986, log10 K = 3066/T − 10.592 bar^-2 (formula, docs/domain.md §3).
        let g = model("CO2 + 3 H2 = CH3OH + H2O", KSourceId::Graaf1986);
        check(
            g.ln_k(500.0),
            (3066.0 / 500.0 - 10.592) * LN_10,
            1e-14,
            "graaf co2",
        );
        let g2 = model("CO + 2 H2 = CH3OH", KSourceId::Graaf1986);
        check(
            g2.ln_k(500.0),
            (5139.0 / 500.0 - 12.621) * LN_10,
            1e-14,
            "graaf co",
        );
    }

    #[test]
    fn multiples_and_reverse_scale_ln_k() {
        let half = model("0.5 N2 + 1.5 H2 = NH3", KSourceId::GillespieBeattie1930);
        let full = model("N2 + 3 H2 = 2 NH3", KSourceId::GillespieBeattie1930);
        let rev = model("2 NH3 = N2 + 3 H2", KSourceId::GillespieBeattie1930);
        check(full.ln_k(700.0), 2.0 * half.ln_k(700.0), 1e-14, "doubled");
        check(rev.ln_k(700.0), -2.0 * half.ln_k(700.0), 1e-14, "reversed");
    }

    #[test]
    fn correlation_refuses_other_reactions() {
        let db = SpeciesDb::builtin();
        let r = parse_reaction("N2 + 3 H2 = 2 NH3", &db).unwrap();
        let e = KModel::from_correlation(KSourceId::Moe1962, &r, &db).unwrap_err();
        assert!(e.to_string().contains("does not describe"), "{e}");
        assert!(KSourceId::parse("moe-1963").is_err());
        assert_eq!(KSourceId::parse("MOE-1962").unwrap(), KSourceId::Moe1962);
    }

    #[test]
    fn species_data_against_janaf() {
        // NIST-JANAF Thermochemical Tables, 4th ed. (Chase 1998), ΔfG° at 1000 K in kJ/mol,
        // from memory: H2O(g) −192.590, CO −200.275, CO2 −395.790, CH4 +19.492.
        // Shift: ΔG° = −395.790 + 200.275 + 192.590 = −2.925 kJ/mol.
        // Reforming: ΔG° = −200.275 − 19.492 + 192.590 = −27.177 kJ/mol.
        // Tolerance 0.3 kJ/mol: NASA TM-4513 and JANAF agree to a few hundred J/mol.
        let db = SpeciesDb::builtin();
        let k = |eq: &str| KModel::from_species(&parse_reaction(eq, &db).unwrap(), &db).unwrap();
        let g = |m: &KModel, t: f64| m.properties(t).delta_g_j_per_mol / 1000.0;
        let shift = k("CO + H2O = CO2 + H2");
        assert!(
            (g(&shift, 1000.0) - -2.925).abs() < 0.3,
            "{}",
            g(&shift, 1000.0)
        );
        let reforming = k("CH4 + H2O = CO + 3 H2");
        assert!(
            (g(&reforming, 1000.0) - -27.177).abs() < 0.3,
            "{}",
            g(&reforming, 1000.0)
        );
        // ΔH° of the shift at 298.15 K: −393.522 + 110.527 + 241.826 = −41.169 kJ/mol
        // (JANAF ΔfH°, from memory).
        let h = shift.properties(298.15).delta_h_j_per_mol / 1000.0;
        assert!((h - -41.169).abs() < 0.1, "{h}");
    }

    #[test]
    fn species_data_against_correlations() {
        // Independent data sets agree within their spread: shift K from NASA data vs
        // Moe at 700 K (docs/domain.md §3 quotes 9.11) within 15 %; ammonia vs Gillespie-Beattie
        // at 723.15 K within 10 % (the NH3 ΔfH° spread alone is about 7 % in K, docs/domain.md §3).
        let db = SpeciesDb::builtin();
        let k = |eq: &str| KModel::from_species(&parse_reaction(eq, &db).unwrap(), &db).unwrap();
        check(
            k("CO + H2O = CO2 + H2").ln_k(700.0).exp(),
            9.11,
            0.15,
            "shift nasa vs moe",
        );
        check(
            k("0.5 N2 + 1.5 H2 = NH3").ln_k(723.15).exp(),
            0.0066074 / 1.01325,
            0.10,
            "ammonia nasa vs gillespie-beattie",
        );
    }

    #[test]
    fn slope_is_the_derivative_of_ln_k() {
        // d ln K/dT must equal a central difference of ln K (consistency of the
        // analytic H integral with the G integral).
        let db = SpeciesDb::builtin();
        for eq in [
            "CH4 + H2O = CO + 3 H2",
            "N2 + 3 H2 = 2 NH3",
            "2 SO2 + O2 = 2 SO3",
        ] {
            let m = KModel::from_species(&parse_reaction(eq, &db).unwrap(), &db).unwrap();
            for t in [450.0, 800.0, 1200.0] {
                let h = 1e-3;
                let num = (m.ln_k(t + h) - m.ln_k(t - h)) / (2.0 * h);
                check(m.d_ln_k_dt(t), num, 1e-6, eq);
            }
        }
        let gb = model("N2 + 3 H2 = 2 NH3", KSourceId::GillespieBeattie1930);
        let num = (gb.ln_k(700.001) - gb.ln_k(699.999)) / 0.002;
        check(gb.d_ln_k_dt(700.0), num, 1e-6, "gb slope");
    }
}
