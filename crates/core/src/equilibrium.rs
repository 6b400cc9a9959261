//! Equilibrium composition of a gas at fixed T and P with a fixed element inventory:
//! several simultaneous reactions solved together by Gibbs-energy minimisation.
//!
//! Method: element potentials. At the minimum of G subject to A n = b the moles are
//! n_i = N exp(a_i·λ − g_i), with g_i = μ°_i/RT + ln(P/p°) + ln φ_i. For a fixed total N
//! the element potentials λ minimise the strictly convex
//! Ψ(λ) = N Σ exp(a_i·λ − g_i) − b·λ (damped Newton with a line search, nalgebra
//! Cholesky); N itself is found by a safeguarded Newton on ln N over a bracket that
//! always contains it (Σ n_i lies between Σb/max atoms and Σb/min atoms). Species are
//! held in log space, so ppm-level and 1e-12 slips are as easy as majors, and K may
//! span many decades. Fugacity coefficients (Peng–Robinson) are updated by successive
//! substitution around the ideal solve.
//!
//! Two ways to give μ°/RT: species data (NASA polynomials), or a complete set of
//! reactions with their K(T) from any source; then g is the minimum-norm solution of
//! Σ_i ν_ri g_i = −ln K_r, which fixes the equilibrium exactly because the reactions
//! span every composition change the element balance allows (checked when built).
//! Species of the gas that take part in no reaction are inert and keep their moles.
//!
//! Pure: no I/O, no clock. "Did not converge" is an outcome with a reason.
//!
//! # References
//! - W. C. Reynolds, "The element potential method for chemical equilibrium analysis:
//!   implementation in the interactive program STANJAN", Stanford University (1986).
//! - W. R. Smith, R. W. Missen, Chemical Reaction Equilibrium Analysis (1982), ch. 2–6.

// Small dense matrix code reads best with index loops.
#![allow(clippy::needless_range_loop)]

use nalgebra::{DMatrix, DVector};
use thiserror::Error;

use crate::thermo::ksource::KModel;
use crate::thermo::peng_robinson::{PengRobinson, PrComponent, PrScratch};
use crate::thermo::reaction::Reaction;
use crate::thermo::species::{ELEMENTS, SpeciesDb};

/// How fugacity coefficients are found.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum EosKind {
    Ideal,
    PengRobinson,
}

impl EosKind {
    pub fn parse(s: &str) -> Option<Self> {
        match s.trim().to_ascii_lowercase().as_str() {
            "ideal" | "ideal-gas" => Some(Self::Ideal),
            "peng-robinson" | "pr" | "peng_robinson" => Some(Self::PengRobinson),
            _ => None,
        }
    }
    pub fn as_str(self) -> &'static str {
        match self {
            Self::Ideal => "ideal",
            Self::PengRobinson => "peng-robinson",
        }
    }
}

/// Builds Peng–Robinson for `species` from the database's critical constants, naming
/// every species that lacks them.
pub fn peng_robinson_for(
    db: &SpeciesDb,
    species: &[usize],
    kij: Option<&[f64]>,
) -> Result<PengRobinson, EquilibriumError> {
    let mut comps = Vec::with_capacity(species.len());
    let mut missing = Vec::new();
    for &s in species {
        match &db.get(s).critical {
            Some(c) => comps.push(PrComponent {
                tc_k: c.tc_k,
                pc_bar: c.pc_bar,
                omega: c.omega,
            }),
            None => missing.push(db.get(s).name.clone()),
        }
    }
    if !missing.is_empty() {
        return Err(EquilibriumError::NoCriticalConstants {
            species: missing.join(", "),
        });
    }
    PengRobinson::new(comps, kij).map_err(|e| EquilibriumError::Eos(e.to_string()))
}

/// Problems building an equilibrium system.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum EquilibriumError {
    #[error(
        "the reactions do not fix the equilibrium of {species}: {n_species} species with {rank} independent elements need {needed} independent reactions, {given} given; add reactions (e.g. the shift beside reforming)"
    )]
    IncompleteReactions {
        species: String,
        n_species: usize,
        rank: usize,
        needed: usize,
        given: usize,
    },
    #[error(
        "the reactions are not independent ({given} given, {independent} independent); remove the redundant one"
    )]
    DependentReactions { given: usize, independent: usize },
    #[error(
        "peng-robinson needs critical constants (tc_k, pc_bar, omega) for: {species}; add them in a species file"
    )]
    NoCriticalConstants { species: String },
    #[error("{0}")]
    Eos(String),
    #[error("no species given")]
    Empty,
}

/// Where μ°/RT comes from.
#[derive(Debug, Clone)]
enum Potentials {
    /// Species data: g_i = G°_i/(RT) per reactive species (database indices).
    Species(Vec<usize>),
    /// Reactions over the reactive species: (ν per reactive species, K model).
    Reactions { nu: Vec<Vec<f64>>, k: Vec<KModel> },
}

/// A gas whose equilibrium can be solved repeatedly at different T, P and inventories.
#[derive(Debug, Clone)]
pub struct EquilibriumSystem {
    /// Database indices of every species, reactive ones first.
    species: Vec<usize>,
    names: Vec<String>,
    n_reactive: usize,
    /// Atoms: row per reactive species, column per element used.
    atoms: Vec<Vec<f64>>,
    /// The independent element rows when every element is present (the usual case),
    /// found once here instead of by a rank test per element on every solve.
    rows_all: Vec<usize>,
    potentials: Potentials,
    eos: Option<PengRobinson>,
}

/// Result of one solve.
#[derive(Debug, Clone, PartialEq)]
pub struct EquilibriumResult {
    /// Moles per species in [`EquilibriumSystem::names`] order (same basis as the input).
    pub moles: Vec<f64>,
    pub mole_fractions: Vec<f64>,
    /// ln φ per species (zeros for an ideal gas).
    pub ln_phi: Vec<f64>,
    pub iterations: u32,
    pub converged: bool,
    /// Why it did not converge (empty when it did).
    pub reason: String,
}

fn rank(m: &DMatrix<f64>) -> usize {
    if m.nrows() == 0 || m.ncols() == 0 {
        return 0;
    }
    let scale = m.iter().fold(0.0f64, |a, x| a.max(x.abs())).max(1.0);
    m.clone().svd(false, false).rank(1e-9 * scale)
}

/// Independent element rows (columns of `atoms`, one row per reactive species) over the
/// `present` species, in element order.
fn independent_rows(atoms: &[Vec<f64>], el_present: &[bool], present: &[usize]) -> Vec<usize> {
    let mut rows: Vec<usize> = Vec::new();
    for j in (0..el_present.len()).filter(|&j| el_present[j]) {
        let mut trial = rows.clone();
        trial.push(j);
        let m = DMatrix::from_fn(trial.len(), present.len(), |r, c| {
            atoms[present[c]][trial[r]]
        });
        if rank(&m) == trial.len() {
            rows = trial;
        }
    }
    rows
}

impl EquilibriumSystem {
    /// Every species in `reactive` may react (species data); `inert` keep their moles.
    pub fn from_species(
        db: &SpeciesDb,
        reactive: &[usize],
        inert: &[usize],
        eos: EosKind,
        kij: Option<&[f64]>,
    ) -> Result<Self, EquilibriumError> {
        if reactive.is_empty() {
            return Err(EquilibriumError::Empty);
        }
        Self::build(
            db,
            reactive.to_vec(),
            inert,
            Potentials::Species(reactive.to_vec()),
            eos,
            kij,
        )
    }

    /// The species of `reactions` react with K(T) from their models; the other species
    /// in `all_species` are inert.
    pub fn from_reactions(
        db: &SpeciesDb,
        reactions: &[(Reaction, KModel)],
        all_species: &[usize],
        eos: EosKind,
        kij: Option<&[f64]>,
    ) -> Result<Self, EquilibriumError> {
        let mut reactive: Vec<usize> = Vec::new();
        for (r, _) in reactions {
            for &s in &r.species {
                if !reactive.contains(&s) {
                    reactive.push(s);
                }
            }
        }
        if reactive.is_empty() {
            return Err(EquilibriumError::Empty);
        }
        let inert: Vec<usize> = all_species
            .iter()
            .copied()
            .filter(|s| !reactive.contains(s))
            .collect();
        let nu: Vec<Vec<f64>> = reactions
            .iter()
            .map(|(r, _)| {
                reactive
                    .iter()
                    .map(|s| {
                        r.species
                            .iter()
                            .position(|x| x == s)
                            .map_or(0.0, |i| r.nu[i])
                    })
                    .collect()
            })
            .collect();
        let k = reactions.iter().map(|(_, k)| k.clone()).collect();
        Self::build(
            db,
            reactive,
            &inert,
            Potentials::Reactions { nu, k },
            eos,
            kij,
        )
    }

    fn build(
        db: &SpeciesDb,
        reactive: Vec<usize>,
        inert: &[usize],
        potentials: Potentials,
        eos: EosKind,
        kij: Option<&[f64]>,
    ) -> Result<Self, EquilibriumError> {
        let used: Vec<usize> = (0..ELEMENTS.len())
            .filter(|&e| reactive.iter().any(|&s| db.get(s).atoms(e) > 0.0))
            .collect();
        let atoms: Vec<Vec<f64>> = reactive
            .iter()
            .map(|&s| used.iter().map(|&e| db.get(s).atoms(e)).collect())
            .collect();
        if let Potentials::Reactions { nu, .. } = &potentials {
            let a = DMatrix::from_fn(used.len(), reactive.len(), |j, i| atoms[i][j]);
            let rank_a = rank(&a);
            let n = DMatrix::from_fn(reactive.len(), nu.len(), |i, r| nu[r][i]);
            let rank_n = rank(&n);
            if rank_n < nu.len() {
                return Err(EquilibriumError::DependentReactions {
                    given: nu.len(),
                    independent: rank_n,
                });
            }
            if rank_a + rank_n != reactive.len() {
                return Err(EquilibriumError::IncompleteReactions {
                    species: reactive
                        .iter()
                        .map(|&s| db.get(s).name.as_str())
                        .collect::<Vec<_>>()
                        .join(", "),
                    n_species: reactive.len(),
                    rank: rank_a,
                    needed: reactive.len() - rank_a,
                    given: rank_n,
                });
            }
        }
        let n_reactive = reactive.len();
        let mut species = reactive;
        for &s in inert {
            if !species.contains(&s) {
                species.push(s);
            }
        }
        let names = species.iter().map(|&s| db.get(s).name.clone()).collect();
        let all_species: Vec<usize> = (0..n_reactive).collect();
        let rows_all = independent_rows(&atoms, &vec![true; used.len()], &all_species);
        let eos = match eos {
            EosKind::Ideal => None,
            EosKind::PengRobinson => Some(peng_robinson_for(db, &species, kij)?),
        };
        Ok(Self {
            species,
            names,
            n_reactive,
            atoms,
            rows_all,
            potentials,
            eos,
        })
    }

    /// Species names, reactive first, then inert.
    pub fn names(&self) -> &[String] {
        &self.names
    }

    /// Database indices in [`Self::names`] order.
    pub fn species(&self) -> &[usize] {
        &self.species
    }

    pub fn n_reactive(&self) -> usize {
        self.n_reactive
    }

    pub fn eos(&self) -> Option<&PengRobinson> {
        self.eos.as_ref()
    }

    /// Standard μ°/RT (1 bar) of the reactive species at `t`.
    fn standard_g(&self, db: &SpeciesDb, t: f64, out: &mut [f64]) {
        match &self.potentials {
            Potentials::Species(idx) => {
                for (o, &s) in out.iter_mut().zip(idx) {
                    *o = db.get(s).g_rt(t);
                }
            }
            Potentials::Reactions { nu, k } => {
                // Minimum-norm g with Nᵀ g = −ln K: g = N (NᵀN)⁻¹ (−ln K).
                let s = self.n_reactive;
                let n = DMatrix::from_fn(s, nu.len(), |i, r| nu[r][i]);
                let rhs = DVector::from_iterator(k.len(), k.iter().map(|m| -m.ln_k(t)));
                let ntn = n.transpose() * &n;
                // Independence was checked when built, so NᵀN is positive definite.
                let c = match ntn.cholesky() {
                    Some(ch) => ch.solve(&rhs),
                    None => DVector::zeros(k.len()),
                };
                let g = n * c;
                out.copy_from_slice(g.as_slice());
            }
        }
    }

    /// Solves at `t_k`, `p_bar` for the element inventory of `moles_in` (moles per species
    /// in [`Self::names`] order; inerts keep theirs). Never panics on bad numbers: the
    /// result says it did not converge, and why.
    pub fn solve(
        &self,
        db: &SpeciesDb,
        t_k: f64,
        p_bar: f64,
        moles_in: &[f64],
    ) -> EquilibriumResult {
        let at = Conditions {
            t_k,
            p_bar,
            moles_in,
        };
        self.try_solve(db, &at)
            .unwrap_or_else(|reason| not_converged(self.species.len(), reason))
    }

    /// [`Self::solve`] with every refusal as `Err(reason)`.
    fn try_solve(&self, db: &SpeciesDb, at: &Conditions) -> Result<EquilibriumResult, String> {
        self.check_inputs(at)?;
        let red = self.reduce(at.moles_in)?;
        let mut pot = self.gas_potentials(db, at, &red)?;
        let total_in: f64 = at.moles_in.iter().sum();
        let mut it = Iterate {
            lambda: initial_lambda(&red, &pot.g, at.moles_in, total_in),
            n: vec![0.0; red.m],
            iterations: 0,
            ln_n: total_in.ln().clamp(red.ln_n_lo, red.ln_n_hi),
        };
        let mut phi = Fugacity::new(self.species.len(), self.eos.as_ref());
        let max_outer = if self.eos.is_some() { 60 } else { 1 };
        let mut converged_phi = self.eos.is_none();
        for _ in 0..max_outer {
            let problem = InnerProblem {
                a: &red.a,
                m: red.m,
                e: red.e,
                b: &red.b,
                g: &pot.g,
            };
            settle_total(&problem, &red, &mut it)?;
            let Some(eos) = &self.eos else { break };
            let change = phi.update(eos, at, &red, &it.n)?;
            pot.include_fugacity(&red.present, &phi.ln_phi);
            if change < 1e-12 {
                converged_phi = true;
                break;
            }
        }
        Ok(finish(&red, at.moles_in, it, phi.ln_phi, converged_phi))
    }

    /// Refuses amounts of the wrong length and non-physical T, P or amounts.
    fn check_inputs(&self, at: &Conditions) -> Result<(), String> {
        let n_all = self.species.len();
        if at.moles_in.len() != n_all {
            return Err(format!(
                "{} amounts given for {} species",
                at.moles_in.len(),
                n_all
            ));
        }
        let (t_k, p_bar) = (at.t_k, at.p_bar);
        if !(t_k.is_finite() && t_k > 0.0 && p_bar.is_finite() && p_bar > 0.0) {
            return Err("temperature and pressure must be positive numbers".into());
        }
        if at.moles_in.iter().any(|x| !x.is_finite() || *x < 0.0) {
            return Err("amounts must be finite and not negative".into());
        }
        Ok(())
    }

    /// The element inventory of `moles_in` over the species and independent elements
    /// actually present, and the bracket on ln N.
    fn reduce(&self, moles_in: &[f64]) -> Result<Reduced, String> {
        let n_reactive = self.n_reactive;
        let n_el = self.atoms.first().map_or(0, |r| r.len());
        let b_all: Vec<f64> = (0..n_el)
            .map(|j| {
                (0..n_reactive)
                    .map(|i| self.atoms[i][j] * moles_in[i])
                    .sum()
            })
            .collect();
        let n_inert: f64 = moles_in[n_reactive..].iter().sum();
        let b_scale = b_all.iter().fold(0.0f64, |a, x| a.max(*x));
        if b_scale <= 0.0 {
            return Err("no reacting species present".into());
        }
        // Elements present, and the species that can exist with them.
        let el_present: Vec<bool> = b_all.iter().map(|b| *b > b_scale * 1e-300).collect();
        let present: Vec<usize> = (0..n_reactive)
            .filter(|&i| (0..n_el).all(|j| self.atoms[i][j] == 0.0 || el_present[j]))
            .collect();
        // With every element present every reactive species is, and the rows are known.
        let rows = if el_present.iter().all(|&p| p) {
            self.rows_all.clone()
        } else {
            independent_rows(&self.atoms, &el_present, &present)
        };
        let e = rows.len();
        let m = present.len();
        if e > MAX_ELEMENTS {
            return Err(format!("more than {MAX_ELEMENTS} independent elements"));
        }
        // Row-major m×e atoms of the present species over the independent elements.
        let mut a = vec![0.0; m * e];
        for (k, &i) in present.iter().enumerate() {
            for (c, &j) in rows.iter().enumerate() {
                a[k * e + c] = self.atoms[i][j];
            }
        }
        let mut b = [0.0; MAX_ELEMENTS];
        for (c, &j) in rows.iter().enumerate() {
            b[c] = b_all[j];
        }
        let atoms_per: Vec<f64> = present
            .iter()
            .map(|&i| self.atoms[i].iter().sum())
            .collect();
        let total_atoms: f64 = b_all.iter().sum();
        let max_atoms = atoms_per.iter().fold(0.0f64, |x, y| x.max(*y));
        let min_atoms = atoms_per.iter().fold(f64::INFINITY, |x, y| x.min(*y));
        Ok(Reduced {
            present,
            a,
            m,
            e,
            b,
            n_reactive,
            n_inert,
            ln_n_lo: (total_atoms / max_atoms + n_inert).ln(),
            ln_n_hi: (total_atoms / min_atoms + n_inert).ln(),
        })
    }

    /// μ°/RT of the reactive species at T and the ideal-gas g of the present ones.
    fn gas_potentials(
        &self,
        db: &SpeciesDb,
        at: &Conditions,
        red: &Reduced,
    ) -> Result<GasPotentials, String> {
        let mut g0 = vec![0.0; self.n_reactive];
        self.standard_g(db, at.t_k, &mut g0);
        if g0.iter().any(|x| !x.is_finite()) {
            return Err("standard potentials are not finite at this temperature".into());
        }
        let ln_p = at.p_bar.ln();
        let g = red.present.iter().map(|&i| g0[i] + ln_p).collect();
        Ok(GasPotentials { g0, ln_p, g })
    }
}

/// The state and inputs of one solve.
struct Conditions<'a> {
    t_k: f64,
    p_bar: f64,
    /// Moles per species in [`EquilibriumSystem::names`] order.
    moles_in: &'a [f64],
}

/// The problem reduced to the species and independent elements present.
struct Reduced {
    /// Reactive species (system indices) whose elements are all present.
    present: Vec<usize>,
    /// Row-major m×e atoms of the present species over the independent elements.
    a: Vec<f64>,
    m: usize,
    e: usize,
    /// Element totals over the independent elements.
    b: [f64; MAX_ELEMENTS],
    n_reactive: usize,
    n_inert: f64,
    /// Bracket on ln N: Σb/max atoms and Σb/min atoms, plus the inerts.
    ln_n_lo: f64,
    ln_n_hi: f64,
}

/// g_i = μ°_i/RT + ln(P/p°) + ln φ_i of the present species, and what it is built from.
struct GasPotentials {
    /// μ°/RT per reactive species.
    g0: Vec<f64>,
    ln_p: f64,
    /// Per present species.
    g: Vec<f64>,
}

impl GasPotentials {
    fn include_fugacity(&mut self, present: &[usize], ln_phi: &[f64]) {
        for (k, &i) in present.iter().enumerate() {
            self.g[k] = self.g0[i] + self.ln_p + ln_phi[i];
        }
    }
}

/// The iterate the solves carry from one to the next.
struct Iterate {
    lambda: [f64; MAX_ELEMENTS],
    /// Moles of the present species.
    n: Vec<f64>,
    iterations: u32,
    ln_n: f64,
}

/// Fugacity coefficients and the buffers their successive substitution uses.
struct Fugacity {
    ln_phi: Vec<f64>,
    y: Vec<f64>,
    new_phi: Vec<f64>,
    scratch: PrScratch,
}

impl Fugacity {
    fn new(n_all: usize, eos: Option<&PengRobinson>) -> Self {
        Self {
            ln_phi: vec![0.0; n_all],
            y: vec![0.0; n_all],
            new_phi: vec![0.0; n_all],
            scratch: eos.map(|e| e.scratch()).unwrap_or_default(),
        }
    }

    /// One substitution pass: ln φ at the moles `n` of the present species and the inerts
    /// of `at`; returns the largest change in ln φ.
    fn update(
        &mut self,
        eos: &PengRobinson,
        at: &Conditions,
        red: &Reduced,
        n: &[f64],
    ) -> Result<f64, String> {
        let tot: f64 = n.iter().sum::<f64>() + red.n_inert;
        self.y.iter_mut().for_each(|y| *y = 0.0);
        for (k, &i) in red.present.iter().enumerate() {
            self.y[i] = n[k] / tot;
        }
        for i in red.n_reactive..self.y.len() {
            self.y[i] = at.moles_in[i] / tot;
        }
        if let Err(err) = eos.ln_phi(
            at.t_k,
            at.p_bar,
            &self.y,
            &mut self.new_phi,
            &mut self.scratch,
        ) {
            return Err(err.to_string());
        }
        let change = self
            .new_phi
            .iter()
            .zip(&self.ln_phi)
            .fold(0.0f64, |a, (x, y)| a.max((x - y).abs()));
        self.ln_phi.copy_from_slice(&self.new_phi);
        Ok(change)
    }
}

/// The result of a solve that stopped with `reason`.
fn not_converged(n_all: usize, reason: String) -> EquilibriumResult {
    EquilibriumResult {
        moles: vec![f64::NAN; n_all],
        mole_fractions: vec![f64::NAN; n_all],
        ln_phi: vec![0.0; n_all],
        iterations: 0,
        converged: false,
        reason,
    }
}

/// Initial element potentials: least squares of a·λ ≈ g + ln x0.
fn initial_lambda(
    red: &Reduced,
    g: &[f64],
    moles_in: &[f64],
    total_in: f64,
) -> [f64; MAX_ELEMENTS] {
    let e = red.e;
    let mut ata = [[0.0; MAX_ELEMENTS]; MAX_ELEMENTS];
    let mut rhs = [0.0; MAX_ELEMENTS];
    for (k, &i) in red.present.iter().enumerate() {
        let target = g[k] + (moles_in[i] / total_in).max(1e-6).ln();
        let row = &red.a[k * e..(k + 1) * e];
        for p in 0..e {
            rhs[p] += row[p] * target;
            for q in 0..e {
                ata[p][q] += row[p] * row[q];
            }
        }
    }
    if cholesky(&mut ata, e) {
        cholesky_solve(&ata, e, &mut rhs);
        rhs
    } else {
        [0.0; MAX_ELEMENTS]
    }
}

/// Finds the total N for the current potentials and leaves `it` at the final inner solve
/// there, which also fills the moles.
fn settle_total(problem: &InnerProblem, red: &Reduced, it: &mut Iterate) -> Result<(), String> {
    // Safeguarded Newton on ln N. The bracket holds the root by construction:
    // Σ n lies between Σb/max atoms and Σb/min atoms whatever λ is, so
    // f = ln(Σn + N_inert) − ln N is ≥ 0 at `lo` and ≤ 0 at `hi`.
    let (mut lo, mut hi) = (red.ln_n_lo, red.ln_n_hi);
    let mut settled = (hi - lo).abs() < 1e-14;
    for _ in 0..100 {
        if settled {
            break;
        }
        let (sum, dsum) = inner(problem, it)?;
        let ln_n = it.ln_n;
        let tot = sum + red.n_inert;
        let f = tot.ln() - ln_n;
        let df = dsum / tot - 1.0;
        if f > 0.0 {
            lo = ln_n;
        } else {
            hi = ln_n;
        }
        if f == 0.0 {
            break;
        }
        let mut next = ln_n - f / df;
        if !(next >= lo && next <= hi && next.is_finite()) {
            next = 0.5 * (lo + hi);
        }
        settled = (next - ln_n).abs() < 1e-14;
        it.ln_n = next;
    }
    // Final inner solve at the chosen total, which also fills the moles.
    inner(problem, it)?;
    Ok(())
}

/// Moles of every species (inerts as given), mole fractions and the outcome.
fn finish(
    red: &Reduced,
    moles_in: &[f64],
    it: Iterate,
    ln_phi: Vec<f64>,
    converged: bool,
) -> EquilibriumResult {
    let n_all = moles_in.len();
    let n_reactive = red.n_reactive;
    let mut moles = vec![0.0; n_all];
    for (k, &i) in red.present.iter().enumerate() {
        moles[i] = it.n[k];
    }
    moles[n_reactive..n_all].copy_from_slice(&moles_in[n_reactive..n_all]);
    let tot: f64 = moles.iter().sum();
    let mole_fractions = moles.iter().map(|x| x / tot).collect();
    EquilibriumResult {
        moles,
        mole_fractions,
        ln_phi,
        iterations: it.iterations,
        converged,
        reason: if converged {
            String::new()
        } else {
            "fugacity coefficients did not settle in 60 passes".into()
        },
    }
}

/// Most independent elements a system may have (C, H, O, N, S, Cl, Ar, He cover the plant).
pub const MAX_ELEMENTS: usize = 8;

/// The fixed data of the inner problem: atoms (row-major m×e), element totals, potentials.
struct InnerProblem<'a> {
    a: &'a [f64],
    m: usize,
    e: usize,
    b: &'a [f64; MAX_ELEMENTS],
    g: &'a [f64],
}

impl InnerProblem<'_> {
    /// n_i = exp(a_i·λ − g_i + ln N) into `n`; returns Ψ = Σ n_i − b·λ.
    fn moles(&self, lambda: &[f64; MAX_ELEMENTS], ln_n: f64, n: &mut [f64]) -> f64 {
        let mut sum = 0.0;
        for (k, nk) in n.iter_mut().enumerate().take(self.m) {
            let row = &self.a[k * self.e..(k + 1) * self.e];
            let w: f64 = row.iter().zip(lambda.iter()).map(|(x, l)| x * l).sum();
            *nk = (w - self.g[k] + ln_n).min(700.0).exp();
            sum += *nk;
        }
        sum - self
            .b
            .iter()
            .zip(lambda.iter())
            .take(self.e)
            .map(|(b, l)| b * l)
            .sum::<f64>()
    }
}

/// In-place Cholesky (lower) of the leading e×e block; false if not positive definite.
fn cholesky(h: &mut [[f64; MAX_ELEMENTS]; MAX_ELEMENTS], e: usize) -> bool {
    for j in 0..e {
        let mut d = h[j][j];
        for k in 0..j {
            d -= h[j][k] * h[j][k];
        }
        if !(d > 0.0 && d.is_finite()) {
            return false;
        }
        let d = d.sqrt();
        h[j][j] = d;
        for i in (j + 1)..e {
            let mut v = h[i][j];
            for k in 0..j {
                v -= h[i][k] * h[j][k];
            }
            h[i][j] = v / d;
        }
    }
    true
}

/// Solves L Lᵀ x = rhs in place with the factor from [`cholesky`].
fn cholesky_solve(l: &[[f64; MAX_ELEMENTS]; MAX_ELEMENTS], e: usize, x: &mut [f64; MAX_ELEMENTS]) {
    for i in 0..e {
        let mut v = x[i];
        for k in 0..i {
            v -= l[i][k] * x[k];
        }
        x[i] = v / l[i][i];
    }
    for i in (0..e).rev() {
        let mut v = x[i];
        for k in (i + 1)..e {
            v -= l[k][i] * x[k];
        }
        x[i] = v / l[i][i];
    }
}

/// Minimises Ψ(λ) = N Σ exp(a_i·λ − g_i) − b·λ for N = exp(`it.ln_n`), starting from
/// `it.lambda`, by Newton with a backtracking line search. Fills `it.n` with the moles at
/// the minimum and returns Σ n_i and d(Σ n_i)/d ln N there. No allocation.
fn inner(p: &InnerProblem, it: &mut Iterate) -> Result<(f64, f64), String> {
    let e = p.e;
    let mut f = p.moles(&it.lambda, it.ln_n, &mut it.n);
    for _ in 0..200 {
        it.iterations += 1;
        let mut lin = Linearised::at(p, &it.n);
        if !lin.factor(e) {
            return Err("element-potential Hessian is singular".into());
        }
        if lin.rel < 1e-13 {
            return Ok(lin.total_derivative(p, &it.n));
        }
        let step = lin.newton_step(e);
        if -step.slope < 1e-12 * (1.0 + f.abs()) {
            // Close in: the predicted decrease of Ψ is below its rounding noise, so a line
            // search would judge noise. Newton converges quadratically here.
            for q in 0..e {
                it.lambda[q] += step.dir[q];
            }
            f = p.moles(&it.lambda, it.ln_n, &mut it.n);
            continue;
        }
        match line_search(p, it, f, &step) {
            Some(ft) => f = ft,
            None => {
                p.moles(&it.lambda, it.ln_n, &mut it.n);
                // No descent possible: accept if the balance is as good as rounding allows.
                if lin.rel < 1e-10 {
                    return Ok(lin.total_derivative(p, &it.n));
                }
                let rel = lin.rel;
                return Err(format!(
                    "line search failed with element balance off by {rel:.1e}"
                ));
            }
        }
    }
    Err("element potentials did not converge in 200 steps".into())
}

/// Ψ's gradient Aᵀn − b and Hessian Aᵀ diag(n) A at one iterate (the Hessian factored
/// in place by [`Linearised::factor`]), and the largest relative element imbalance.
struct Linearised {
    grad: [f64; MAX_ELEMENTS],
    h: [[f64; MAX_ELEMENTS]; MAX_ELEMENTS],
    rel: f64,
}

/// A damped Newton direction and Ψ's slope along it.
struct Step {
    dir: [f64; MAX_ELEMENTS],
    slope: f64,
}

impl Linearised {
    fn at(p: &InnerProblem, n: &[f64]) -> Self {
        let e = p.e;
        // Gradient Aᵀn − b and Hessian Aᵀ diag(n) A.
        let mut grad = [0.0; MAX_ELEMENTS];
        let mut h = [[0.0; MAX_ELEMENTS]; MAX_ELEMENTS];
        for k in 0..p.m {
            let row = &p.a[k * e..(k + 1) * e];
            for q in 0..e {
                let aq = row[q] * n[k];
                if aq == 0.0 {
                    continue;
                }
                grad[q] += aq;
                for r in 0..=q {
                    h[q][r] += aq * row[r];
                }
            }
        }
        let mut rel = 0.0f64;
        for q in 0..e {
            grad[q] -= p.b[q];
            rel = rel.max(grad[q].abs() / p.b[q]);
        }
        Self { grad, h, rel }
    }

    /// Factors the Hessian in place; false if it is singular.
    fn factor(&mut self, e: usize) -> bool {
        // A tiny ridge keeps the factorisation alive when an element's species are all
        // vanishingly rare at the current iterate.
        let h = &mut self.h;
        let diag_max = (0..e).fold(0.0f64, |x, q| x.max(h[q][q]));
        for q in 0..e {
            h[q][q] += 1e-300f64.max(diag_max * 1e-15);
        }
        cholesky(h, e)
    }

    /// Σ n_i and d(Σ n_i)/d ln N at the moles `n` (after [`Self::factor`]).
    fn total_derivative(&self, p: &InnerProblem, n: &[f64]) -> (f64, f64) {
        let e = p.e;
        // dλ/d ln N = −H⁻¹ b; dΣn/d ln N = Σn + (Aᵀn)·dλ.
        let mut dl = [0.0; MAX_ELEMENTS];
        for q in 0..e {
            dl[q] = -p.b[q];
        }
        cholesky_solve(&self.h, e, &mut dl);
        let sum: f64 = n[..p.m].iter().sum();
        let mut d = sum;
        for q in 0..e {
            d += (self.grad[q] + p.b[q]) * dl[q];
        }
        (sum, d)
    }

    /// The Newton direction (after [`Self::factor`]), damped.
    fn newton_step(&self, e: usize) -> Step {
        let mut dir = [0.0; MAX_ELEMENTS];
        for q in 0..e {
            dir[q] = -self.grad[q];
        }
        cholesky_solve(&self.h, e, &mut dir);
        // Damping: element potentials move at most 10 per step (e^10 in any amount).
        let big = dir[..e].iter().fold(0.0f64, |x, s| x.max(s.abs()));
        if big > 10.0 {
            dir[..e].iter_mut().for_each(|s| *s *= 10.0 / big);
        }
        let slope: f64 = (0..e).map(|q| self.grad[q] * dir[q]).sum();
        Step { dir, slope }
    }
}

/// Backtracking (Armijo) along `step` from `it.lambda`, where Ψ is `f`; on success moves
/// `it.lambda` and returns the new Ψ (with `it.n` filled there), else `None` (`it.n` is
/// then stale).
fn line_search(p: &InnerProblem, it: &mut Iterate, f: f64, step: &Step) -> Option<f64> {
    let mut alpha = 1.0;
    for _ in 0..60 {
        let mut trial = it.lambda;
        for q in 0..p.e {
            trial[q] += alpha * step.dir[q];
        }
        let ft = p.moles(&trial, it.ln_n, &mut it.n);
        if ft.is_finite() && ft <= f + 1e-4 * alpha * step.slope + 1e-15 * f.abs() {
            it.lambda = trial;
            return Some(ft);
        }
        alpha *= 0.5;
    }
    None
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::thermo::reaction::parse_reaction;

    fn idx(db: &SpeciesDb, names: &[&str]) -> Vec<usize> {
        names.iter().map(|n| db.index_of(n).unwrap()).collect()
    }

    #[test]
    fn ammonia_equilibrium_satisfies_mass_action_and_balance() {
        let db = SpeciesDb::builtin();
        let sp = idx(&db, &["N2", "H2", "NH3"]);
        let ar = idx(&db, &["Ar"]);
        let sys = EquilibriumSystem::from_species(&db, &sp, &ar, EosKind::Ideal, None).unwrap();
        let feed = [1.0, 3.0, 0.0, 0.1];
        let r = sys.solve(&db, 700.0, 150.0, &feed);
        assert!(r.converged, "{}", r.reason);
        let y = &r.mole_fractions;
        // ln Q = ln K at the solution (definition of equilibrium).
        let rx = parse_reaction("N2 + 3 H2 = 2 NH3", &db).unwrap();
        let k = KModel::from_species(&rx, &db).unwrap();
        let ln_q = 2.0 * (y[2] * 150.0).ln() - (y[0] * 150.0).ln() - 3.0 * (y[1] * 150.0).ln();
        assert!(
            (ln_q - k.ln_k(700.0)).abs() < 1e-9,
            "{ln_q} vs {}",
            k.ln_k(700.0)
        );
        // Element balance: N = 2 and H = 6 per the feed; Ar kept.
        let n = &r.moles;
        assert!((2.0 * n[0] + n[2] - 2.0).abs() < 1e-12);
        assert!((2.0 * n[1] + 3.0 * n[2] - 6.0).abs() < 1e-12);
        assert_eq!(n[3], 0.1);
    }

    #[test]
    fn reactions_and_species_data_give_the_same_answer() {
        // With K from the same species data, the reaction route must reproduce the
        // species route exactly (it is the same minimum).
        let db = SpeciesDb::builtin();
        let sp = idx(&db, &["CH4", "H2O", "CO", "CO2", "H2"]);
        let a = EquilibriumSystem::from_species(&db, &sp, &[], EosKind::Ideal, None).unwrap();
        let rx: Vec<(Reaction, KModel)> = ["CH4 + H2O = CO + 3 H2", "CO + H2O = CO2 + H2"]
            .iter()
            .map(|e| {
                let r = parse_reaction(e, &db).unwrap();
                let k = KModel::from_species(&r, &db).unwrap();
                (r, k)
            })
            .collect();
        let b = EquilibriumSystem::from_reactions(&db, &rx, &sp, EosKind::Ideal, None).unwrap();
        let feed = [1.0, 3.0, 0.0, 0.0, 0.0];
        let ra = a.solve(&db, 1100.0, 30.0, &feed);
        // b orders species by appearance in the reactions: CH4, H2O, CO, H2, CO2.
        let rb = b.solve(&db, 1100.0, 30.0, &[1.0, 3.0, 0.0, 0.0, 0.0]);
        assert!(ra.converged && rb.converged);
        for (name, ya) in a.names().iter().zip(&ra.mole_fractions) {
            let k = b.names().iter().position(|n| n == name).unwrap();
            assert!((ya - rb.mole_fractions[k]).abs() < 1e-12, "{name}");
        }
    }

    #[test]
    fn a_feed_without_one_element_solves_over_the_elements_it_has() {
        // No carbon in the feed: the rows found once for every element present do not
        // apply, the per-feed search does. Steam and hydrogen alone do not react here
        // (no species of H and O only besides these two), so they leave as they came
        // and the carbon species stay at zero (element balance, common practice).
        let db = SpeciesDb::builtin();
        let sp = idx(&db, &["CH4", "H2O", "CO", "CO2", "H2"]);
        let sys = EquilibriumSystem::from_species(&db, &sp, &[], EosKind::Ideal, None).unwrap();
        assert_eq!(sys.rows_all.len(), 3, "C, H and O are independent");
        let r = sys.solve(&db, 900.0, 20.0, &[0.0, 2.0, 0.0, 0.0, 1.0]);
        assert!(r.converged, "{}", r.reason);
        assert_eq!((r.moles[0], r.moles[2], r.moles[3]), (0.0, 0.0, 0.0));
        assert!((r.moles[1] - 2.0).abs() < 1e-12 && (r.moles[4] - 1.0).abs() < 1e-12);
        // And with carbon back the full set is used (the same answer as a fresh search).
        let full = sys.solve(&db, 900.0, 20.0, &[1.0, 2.0, 0.0, 0.0, 1.0]);
        assert!(full.converged, "{}", full.reason);
        let c_in = 1.0;
        let c_out = full.moles[0] + full.moles[2] + full.moles[3];
        assert!((c_out - c_in).abs() < 1e-12, "carbon {c_out}");
    }

    #[test]
    fn incomplete_reaction_set_is_refused() {
        let db = SpeciesDb::builtin();
        let r = parse_reaction("CH4 + H2O = CO + 3 H2", &db).unwrap();
        let k = KModel::from_species(&r, &db).unwrap();
        // CO2 listed as reactive through a second reaction is missing: with only
        // reforming, CO2 is inert, which is allowed.
        let sp = idx(&db, &["CH4", "H2O", "CO", "H2", "CO2"]);
        assert!(
            EquilibriumSystem::from_reactions(
                &db,
                &[(r.clone(), k.clone())],
                &sp,
                EosKind::Ideal,
                None
            )
            .is_ok()
        );
        // The same reaction twice is dependent.
        let e = EquilibriumSystem::from_reactions(
            &db,
            &[(r.clone(), k.clone()), (r, k)],
            &sp,
            EosKind::Ideal,
            None,
        )
        .unwrap_err();
        assert!(
            matches!(e, EquilibriumError::DependentReactions { .. }),
            "{e}"
        );
    }

    #[test]
    fn bad_numbers_are_outcomes() {
        let db = SpeciesDb::builtin();
        let sp = idx(&db, &["N2", "H2", "NH3"]);
        let sys = EquilibriumSystem::from_species(&db, &sp, &[], EosKind::Ideal, None).unwrap();
        assert!(!sys.solve(&db, f64::NAN, 150.0, &[1.0, 3.0, 0.0]).converged);
        assert!(!sys.solve(&db, 700.0, 150.0, &[1.0, -3.0, 0.0]).converged);
        assert!(!sys.solve(&db, 700.0, 150.0, &[0.0, 0.0, 0.0]).converged);
        assert!(!sys.solve(&db, 700.0, 150.0, &[1.0, 3.0]).converged);
    }

    #[test]
    fn larson_dodge_ammonia_with_fugacity() {
        // Equilibrium NH3 from a 3:1 H2:N2 feed, no inerts (Larson & Dodge measurements as
        // tabulated in textbooks, docs/domain.md §4 [secondary]): 16.4 % at 450 °C/100 atm,
        // 47 % at 400 °C/300 atm, 26.4 % at 500 °C/300 atm. NASA data + Peng–Robinson
        // with k_ij = 0; tolerance 1.5 mol% absolute (NH3 data spread ~7 % in K and
        // PR without k_ij; measured values themselves ±0.5 %).
        let db = SpeciesDb::builtin();
        let sp = idx(&db, &["N2", "H2", "NH3"]);
        let sys =
            EquilibriumSystem::from_species(&db, &sp, &[], EosKind::PengRobinson, None).unwrap();
        for (t_c, p_atm, y_ref) in [
            (450.0, 100.0, 0.164),
            (400.0, 300.0, 0.47),
            (500.0, 300.0, 0.264),
        ] {
            let r = sys.solve(&db, t_c + 273.15, p_atm * 1.01325, &[1.0, 3.0, 0.0]);
            assert!(r.converged, "{}", r.reason);
            let y = r.mole_fractions[2];
            assert!(
                (y - y_ref).abs() < 0.015,
                "{t_c} degC {p_atm} atm: {y} vs {y_ref}"
            );
        }
    }

    #[test]
    fn trace_slip_at_a_methanator() {
        // CO and CO2 fall to ppm or below; element balance must still hold to 1e-10
        // relative and every amount stay positive.
        let db = SpeciesDb::builtin();
        let sp = idx(&db, &["CO", "CO2", "H2", "CH4", "H2O"]);
        let n2 = idx(&db, &["N2"]);
        let sys = EquilibriumSystem::from_species(&db, &sp, &n2, EosKind::Ideal, None).unwrap();
        let feed = [0.3, 0.1, 74.0, 1.0, 0.1, 24.5];
        let r = sys.solve(&db, 600.0, 28.0, &feed);
        assert!(r.converged, "{}", r.reason);
        assert!(
            r.mole_fractions[0] < 1e-6 && r.mole_fractions[0] > 0.0,
            "{:?}",
            r.mole_fractions
        );
        let c_in = 0.3 + 0.1 + 1.0;
        let c_out = r.moles[0] + r.moles[1] + r.moles[3];
        assert!((c_out / c_in - 1.0).abs() < 1e-10);
    }
}

#[cfg(test)]
mod properties {
    use super::*;
    use crate::approach::{Direction, GasState, ReactorModel, Uncertainty};
    use crate::thermo::reaction::parse_reaction;
    use proptest::prelude::*;

    fn reactions(db: &SpeciesDb, eqs: &[&str]) -> Vec<(Reaction, KModel)> {
        eqs.iter()
            .map(|e| {
                let r = parse_reaction(e, db).unwrap();
                let k = KModel::from_species(&r, db).unwrap();
                (r, k)
            })
            .collect()
    }

    /// ln Q (activities on 1 bar, with φ) of reaction `r` for the solved gas of `sys`.
    fn ln_q(sys: &EquilibriumSystem, res: &EquilibriumResult, r: &Reaction, p: f64) -> f64 {
        r.species
            .iter()
            .zip(&r.nu)
            .map(|(s, nu)| {
                let i = sys.species().iter().position(|x| x == s).unwrap();
                nu * (res.ln_phi[i] + res.mole_fractions[i].ln() + p.ln())
            })
            .sum()
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(64))]

        /// Reformer + shift: mass action holds for both reactions and every element balances.
        #[test]
        fn reformer_mass_action_and_balance(
            t in 600.0f64..1300.0, p in 1.0f64..60.0, s_c in 1.0f64..6.0, co2 in 0.0f64..0.5, h2 in 0.0f64..0.5
        ) {
            let db = SpeciesDb::builtin();
            let rx = reactions(&db, &["CH4 + H2O = CO + 3 H2", "CO + H2O = CO2 + H2"]);
            let all: Vec<usize> = ["CH4", "H2O", "CO", "H2", "CO2"].iter().map(|n| db.index_of(n).unwrap()).collect();
            let sys = EquilibriumSystem::from_reactions(&db, &rx, &all, EosKind::Ideal, None).unwrap();
            // System order is by first appearance: CH4, H2O, CO, H2, CO2.
            let feed = [1.0, s_c, 0.0, h2, co2];
            let res = sys.solve(&db, t, p, &feed);
            prop_assert!(res.converged, "{}", res.reason);
            for (r, k) in &rx {
                let d = ln_q(&sys, &res, r, p) - k.ln_k(t);
                prop_assert!(d.abs() < 1e-8, "{}: ln Q − ln K = {d}", r.text);
            }
            let n = &res.moles;
            let c = (n[0] + n[2] + n[4]) / (1.0 + co2);
            let h = (4.0 * n[0] + 2.0 * n[1] + 2.0 * n[3]) / (4.0 + 2.0 * s_c + 2.0 * h2);
            let o = (n[1] + n[2] + 2.0 * n[4]) / (s_c + 2.0 * co2);
            for (el, ratio) in [("C", c), ("H", h), ("O", o)] {
                prop_assert!((ratio - 1.0).abs() < 1e-10, "{el} balance off by {}", ratio - 1.0);
            }
        }

        /// Ammonia with Peng–Robinson fugacities: mass action on fugacities holds.
        #[test]
        fn ammonia_pr_mass_action(t in 600.0f64..850.0, p in 20.0f64..350.0, inert in 0.0f64..0.3) {
            let db = SpeciesDb::builtin();
            let rx = reactions(&db, &["N2 + 3 H2 = 2 NH3"]);
            let all: Vec<usize> = ["N2", "H2", "NH3", "Ar"].iter().map(|n| db.index_of(n).unwrap()).collect();
            let sys = EquilibriumSystem::from_reactions(&db, &rx, &all, EosKind::PengRobinson, None).unwrap();
            let res = sys.solve(&db, t, p, &[1.0, 3.0, 0.0, inert]);
            prop_assert!(res.converged, "{}", res.reason);
            let d = ln_q(&sys, &res, &rx[0].0, p) - rx[0].1.ln_k(t);
            prop_assert!(d.abs() < 1e-8, "ln Q − ln K = {d}");
            prop_assert!((res.moles[3] - inert).abs() == 0.0);
        }

        /// A gas at equilibrium at T shows a zero approach at T, and an approach of exactly
        /// the temperature difference when read at another temperature (ideal gas).
        #[test]
        fn approach_is_zero_at_equilibrium_and_tracks_temperature(
            t in 450.0f64..1200.0, p in 1.0f64..40.0, dt in -40.0f64..40.0
        ) {
            let db = SpeciesDb::builtin();
            let rx = reactions(&db, &["CO + H2O = CO2 + H2"]);
            let all: Vec<usize> = ["CO", "H2O", "CO2", "H2", "N2"].iter().map(|n| db.index_of(n).unwrap()).collect();
            let sys = EquilibriumSystem::from_reactions(&db, &rx, &all, EosKind::Ideal, None).unwrap();
            let res = sys.solve(&db, t, p, &[0.12, 0.35, 0.05, 0.40, 0.08]);
            prop_assert!(res.converged);
            let model = ReactorModel::new(&db, rx.clone(), sys.species(), EosKind::Ideal, None).unwrap();
            let mut scratch = model.scratch();
            for (t_read, expected) in [(t, 0.0), (t + dt, -dt)] {
                // Exothermic: approach = T_eq − T_read = t − (t + dt) = −dt.
                let st = GasState { temperature_k: t_read, pressure_bar: p, y: &res.mole_fractions, steam_ratio: None };
                model.fugacity(&st, &mut scratch);
                let a = model.evaluate(0, &st, &scratch, &Uncertainty::default());
                let got = a.approach_k.unwrap();
                prop_assert!((got - expected).abs() < 1e-6, "read at {t_read}: {got} vs {expected}");
                if t_read == t {
                    prop_assert_eq!(a.direction, Direction::AtEquilibrium);
                }
            }
        }
    }
}
