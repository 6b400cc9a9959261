//! Inlet/outlet element balance of a reactor, weighted least-squares reconciliation of
//! its flow and analyser measurements subject to those balances, and gross error
//! detection (global test and measurement test) naming the instrument most likely at
//! fault.
//!
//! Pure: species data and measurements in, numbers out; no I/O, no clock.
//!
//! # The model
//! Each stream (inlet, outlet) is a dry-gas molar flow F (kmol/h), its dry mole fractions
//! y_k as the analyser reports them, and a separate water/steam flow W (kmol/h), absent for
//! a dry stream. Every one of these is measured (value and standard deviation σ, with an
//! instrument tag) or unmeasured. For every element e present in either stream (taken
//! from the species' make-up, so Ar or S count as well as C, H, O, N):
//!
//! f_e = F_in Σ_k a_ek y_in,k + w_e W_in − F_out Σ_k a_ek y_out,k − w_e W_out = 0,
//!
//! with a_ek the atoms of e in species k and w_e those in H2O (H 2, O 1). Each analysis is
//! also constrained to sum to one, Σ_k y_k − 1 = 0, rather than normalised beforehand: the
//! sum then takes part in the weighting (a low analysis is spread over its components by
//! their variances), the global test sees an analyser whose total is off, and one component
//! may be left unmeasured ("by difference"). A composition must therefore list every dry
//! species of its stream. Element rows are divided by the larger stream's total flow so
//! that every constraint is dimensionless.
//!
//! # Reconciliation
//! Minimise (x̂ − x)ᵀ Σ⁻¹ (x̂ − x) over the measured x̂ and unmeasured û subject to
//! f(x̂, û) = 0 (Σ diagonal, σ²). The constraints are bilinear (flow × fraction), so they
//! are linearised at the current estimate (x_k, u_k), A = ∂f/∂x, B = ∂f/∂u:
//!
//! A (x̂ − x) + B (û − u_k) + c = 0,   c = f(x_k, u_k) + A (x − x_k),
//!
//! and the linear problem is solved exactly; this is repeated until the constraint residual
//! and the step vanish (successive linearisation, i.e. Gauss–Newton on the constrained
//! problem). Each linear problem is solved by **Crowe's projection**: a Householder QR of B
//! (columns scaled to unit length) gives B = [Q₁ Q₂] [R₁; 0]; Q₂ᵀ removes the unmeasured
//! variables, leaving the projected constraints G (x̂ − x) + r = 0 with G = Q₂ᵀA, r = Q₂ᵀc.
//! Rows of G that are linearly dependent (combinations of balances that involve no
//! measurement) are dropped through an SVD of G Σ^½, so G has full row rank ν, the
//! redundancy. Then
//!
//! x̂ = x − Σ Gᵀ (G Σ Gᵀ)⁻¹ r,   û = u_k − R₁⁻¹ Q₁ᵀ (f + A (x̂ − x_k)).
//!
//! An unmeasured quantity is determinable only if B has full column rank; before the QR the
//! null space of B (SVD) names the unmeasured quantities it touches, and these are reported
//! in [`ReconcileError::Undeterminable`]. (Across one reactor the element balances only see
//! W_in − W_out, so at least one of the two water flows must be measured.)
//!
//! At the solution, with M = G Σ Gᵀ, the adjustments a = x − x̂ have covariance
//! V = Σ Gᵀ M⁻¹ G Σ, the reconciled measurements Σ − V, and the unmeasured estimates
//! K (Σ − V) Kᵀ with K = −R₁⁻¹ Q₁ᵀ A (first-order propagation).
//!
//! # Gross error detection
//! - Global test: γ = rᵀ M⁻¹ r (equal to the weighted sum of squared adjustments) is
//!   χ²(ν) without gross errors; it fails when γ exceeds the 1 − α quantile.
//! - Measurement test: z_j = |a_j| / √V_jj for each measurement with V_jj > 0 (a
//!   measurement no balance checks has V_jj = 0 and no test). The n tests share the overall
//!   significance α by Šidák's correction, β = 1 − (1 − α)^(1/n), critical value
//!   z_c = Φ⁻¹(1 − β/2). The suspect is the tag with the largest z above z_c (if several tie
//!   exactly, the first in input order: such measurements cannot be told apart).
//!
//! The χ² and normal quantiles are computed here: the regularised incomplete gamma function
//! (power series below a + 1, Lentz's continued fraction above), ln Γ exactly for the
//! half-integers a degree-of-freedom count needs, and Brent's method
//! ([`crate::solve::brent`]) on the logarithm of the upper tail.
//!
//! # References
//! - C. M. Crowe, Y. A. Garcia Campos, A. Hrymak, "Reconciliation of process flow rates by
//!   matrix projection. Part I: linear case", AIChE J. 29 (1983) 881–888: the projection.
//! - S. Narasimhan, C. Jordache, Data Reconciliation and Gross Error Detection (2000),
//!   ch. 3 (linear reconciliation, projection), ch. 5 (bilinear, successive linearisation),
//!   ch. 7 (global test, measurement test, Šidák's correction); chapter numbers from memory.
//! - Z. Šidák, "Rectangular confidence regions for the means of multivariate normal
//!   distributions", J. Amer. Statist. Assoc. 62 (1967) 626–633 (pages from memory).
//! - W. H. Press et al., Numerical Recipes, 3rd ed. (2007), §6.2: incomplete gamma function.
//! - docs/domain.md §5 (dry basis, water as a separate quantity) and §10.

// Small dense matrix code reads best with index loops.
#![allow(clippy::needless_range_loop)]

use nalgebra::{DMatrix, DVector};
use thiserror::Error;

use crate::solve::{RootOutcome, brent};
use crate::thermo::species::{ELEMENTS, SpeciesDb, element_index};

// ---------------------------------------------------------------------------------------
// Inputs

/// A measured value or an unknown.
#[derive(Debug, Clone, PartialEq)]
pub enum Reading {
    /// Measured `value` with standard deviation `sigma` (same unit, > 0).
    Measured { value: f64, sigma: f64 },
    /// Not measured; estimated from the balances. `guess` only starts the iteration.
    Unmeasured { guess: Option<f64> },
}

/// One quantity of a stream and the instrument tag that names it (e.g. "FI-101",
/// "AI-201 CO").
#[derive(Debug, Clone, PartialEq)]
pub struct Quantity {
    pub tag: String,
    pub reading: Reading,
}

impl Quantity {
    pub fn measured(tag: impl Into<String>, value: f64, sigma: f64) -> Self {
        Self {
            tag: tag.into(),
            reading: Reading::Measured { value, sigma },
        }
    }
    pub fn unmeasured(tag: impl Into<String>) -> Self {
        Self {
            tag: tag.into(),
            reading: Reading::Unmeasured { guess: None },
        }
    }
    /// The same unmeasured quantity with a starting value (no effect on a measured one).
    pub fn with_guess(mut self, guess: f64) -> Self {
        if let Reading::Unmeasured { guess: g } = &mut self.reading {
            *g = Some(guess);
        }
        self
    }
}

/// A stream as measured: dry flow, dry analysis, water.
#[derive(Debug, Clone, PartialEq)]
pub struct Stream {
    /// Dry-gas molar flow, kmol/h.
    pub dry_flow: Quantity,
    /// (species index in the [`SpeciesDb`], dry mole fraction); every dry species.
    pub dry: Vec<(usize, Quantity)>,
    /// Water/steam flow, kmol/h; `None` for a stream with no water.
    pub water: Option<Quantity>,
}

/// A stream as numbers (kmol/h and dry mole fractions).
#[derive(Debug, Clone, PartialEq)]
pub struct StreamValues {
    pub dry_flow: f64,
    pub dry: Vec<(usize, f64)>,
    pub water: f64,
}

impl StreamValues {
    /// Steam-to-dry-gas ratio, mol H2O per mol dry gas (`None` at zero dry flow).
    pub fn steam_to_dry(&self) -> Option<f64> {
        (self.dry_flow > 0.0).then(|| self.water / self.dry_flow)
    }
}

/// Settings of [`reconcile`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Options {
    /// Overall significance of the global test and of the measurement tests together.
    pub alpha: f64,
    pub max_iterations: u32,
    /// Converged when the dimensionless constraint residual is below this …
    pub residual_tolerance: f64,
    /// … and the last change of every measured estimate is below this many σ.
    pub step_tolerance: f64,
}

impl Default for Options {
    fn default() -> Self {
        Self {
            alpha: 0.05,
            max_iterations: 50,
            residual_tolerance: 1e-12,
            step_tolerance: 1e-9,
        }
    }
}

// ---------------------------------------------------------------------------------------
// Outputs

/// One element's balance.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ElementClosure {
    pub element: &'static str,
    /// Atoms in and out, kmol/h.
    pub in_kmol_h: f64,
    pub out_kmol_h: f64,
    /// out / in.
    pub closure: f64,
    /// 100 (out − in) / in.
    pub imbalance_pct: f64,
}

/// The measurement test of one measurement.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct MeasurementTest {
    /// Measured − reconciled.
    pub adjustment: f64,
    /// Standard deviation of the adjustment.
    pub adjustment_sigma: f64,
    pub z: f64,
    /// Šidák-corrected critical value (the same for every test of a reconciliation).
    pub critical: f64,
    pub failed: bool,
}

/// The reconciled value of one quantity.
#[derive(Debug, Clone, PartialEq)]
pub struct Estimate {
    pub tag: String,
    /// The measurement (`None` if unmeasured).
    pub measured: Option<f64>,
    pub reconciled: f64,
    /// Standard deviation of the reconciled value (first order).
    pub sigma: f64,
    /// `None` for unmeasured quantities and for measurements no balance checks.
    pub test: Option<MeasurementTest>,
}

/// The global (χ²) test.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct GlobalTest {
    pub statistic: f64,
    /// Degrees of freedom: the redundancy, the rank of the projected constraints.
    pub dof: usize,
    pub critical: f64,
    pub passed: bool,
}

/// Everything a reconciliation gives a caller to publish.
#[derive(Debug, Clone, PartialEq)]
pub struct Reconciliation {
    /// Every quantity, in input order: inlet dry flow, water, analysis; then the outlet's.
    pub estimates: Vec<Estimate>,
    pub inlet: StreamValues,
    pub outlet: StreamValues,
    /// Element closure of the raw measurements, with the unmeasured quantities at their
    /// reconciled values (they have no raw value).
    pub closure_before: Vec<ElementClosure>,
    pub closure_after: Vec<ElementClosure>,
    /// `None` when there is no redundancy (nothing to test).
    pub global: Option<GlobalTest>,
    /// The tag with the largest measurement-test statistic above its critical value.
    pub suspect: Option<String>,
    /// Tags whose adjustments are perfectly correlated with the suspect's (an equivalent
    /// set: a gross error in any of them looks the same, e.g. the inlet and outlet dry flow
    /// meters when every analysis is measured). Empty without a suspect.
    pub suspect_equivalents: Vec<String>,
    pub iterations: u32,
    /// Euclidean norm of the dimensionless constraints at the solution.
    pub residual_norm: f64,
}

impl Reconciliation {
    /// Reconciled outlet dry mole fractions (sum to one), for a second approach figure.
    pub fn outlet_dry_fractions(&self) -> &[(usize, f64)] {
        &self.outlet.dry
    }
    /// Reconciled outlet steam-to-dry-gas ratio.
    pub fn outlet_steam_to_dry(&self) -> Option<f64> {
        self.outlet.steam_to_dry()
    }
    /// Reconciled inlet steam-to-dry-gas ratio.
    pub fn inlet_steam_to_dry(&self) -> Option<f64> {
        self.inlet.steam_to_dry()
    }
    /// Tags of the quantities reconciled below zero. The least squares are unbounded, so
    /// next to a gross error a trace can be pushed below zero; such a result is no gas to
    /// compute with (the monitor then gives no reconciled approach), though its tests stand.
    pub fn below_zero(&self) -> Vec<&str> {
        self.estimates
            .iter()
            .filter(|e| e.reconciled < 0.0)
            .map(|e| e.tag.as_str())
            .collect()
    }
    /// The estimate of the quantity tagged `tag`.
    pub fn estimate(&self, tag: &str) -> Option<&Estimate> {
        self.estimates.iter().find(|e| e.tag == tag)
    }
}

/// Why a balance or a reconciliation could not be made.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum ReconcileError {
    #[error("not enough redundancy: {} cannot be determined from the balances", .tags.join(", "))]
    Undeterminable { tags: Vec<String> },
    #[error("{tag}: non-physical input: {what}")]
    NonPhysical { tag: String, what: String },
    #[error("species index {index} is not in the species database")]
    UnknownSpecies { index: usize },
    #[error("singular system: {0}")]
    Singular(String),
    #[error("no convergence after {iterations} iterations (constraint residual {residual:e})")]
    NoConvergence { iterations: u32, residual: f64 },
    #[error("invalid option: {0}")]
    InvalidOption(String),
}

// ---------------------------------------------------------------------------------------
// Element balance

/// Atoms of H2O per element index (H 2, O 1).
fn water_atoms(e: usize) -> f64 {
    if Some(e) == element_index("H") {
        2.0
    } else if Some(e) == element_index("O") {
        1.0
    } else {
        0.0
    }
}

/// The elements present (ascending index) in the species listed and, with water, H and O.
fn elements_present(
    db: &SpeciesDb,
    species: impl Iterator<Item = usize>,
    water: bool,
) -> Result<Vec<usize>, ReconcileError> {
    let mut present = vec![false; ELEMENTS.len()];
    for i in species {
        if i >= db.len() {
            return Err(ReconcileError::UnknownSpecies { index: i });
        }
        for &(e, n) in &db.get(i).elements {
            if n > 0.0 && e < present.len() {
                present[e] = true;
            }
        }
    }
    for (e, p) in present.iter_mut().enumerate() {
        *p |= water && water_atoms(e) > 0.0;
    }
    Ok((0..present.len()).filter(|&e| present[e]).collect())
}

/// Atoms of element `e` carried by a stream, kmol/h.
fn atom_flow(db: &SpeciesDb, s: &StreamValues, e: usize) -> f64 {
    let dry: f64 = s.dry.iter().map(|&(i, y)| db.get(i).atoms(e) * y).sum();
    s.dry_flow * dry + water_atoms(e) * s.water
}

/// Closure of every element present in either stream (C, H, O, N, and any other).
pub fn element_balance(
    db: &SpeciesDb,
    inlet: &StreamValues,
    outlet: &StreamValues,
) -> Result<Vec<ElementClosure>, ReconcileError> {
    let species = inlet.dry.iter().chain(&outlet.dry).map(|&(i, _)| i);
    let water = inlet.water != 0.0 || outlet.water != 0.0;
    let elements = elements_present(db, species, water)?;
    Ok(elements
        .into_iter()
        .map(|e| {
            let (i, o) = (atom_flow(db, inlet, e), atom_flow(db, outlet, e));
            ElementClosure {
                element: ELEMENTS[e],
                in_kmol_h: i,
                out_kmol_h: o,
                closure: o / i,
                imbalance_pct: 100.0 * (o - i) / i,
            }
        })
        .collect())
}

// ---------------------------------------------------------------------------------------
// The reactor model: the variable vector and its constraints

/// How a variable enters the estimation.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Role {
    Measured {
        sigma: f64,
    },
    Unmeasured,
    /// A water flow that does not exist (held at zero).
    Fixed,
}

/// The variables in the order [F_in, W_in, y_in…, F_out, W_out, y_out…].
struct Variables {
    values: Vec<f64>,
    roles: Vec<Role>,
    tags: Vec<String>,
}

/// Element rows then the two fraction sums, all dimensionless.
struct Model {
    /// Atoms of each element (columns) in each inlet/outlet species (rows).
    a_in: Vec<Vec<f64>>,
    a_out: Vec<Vec<f64>>,
    w: Vec<f64>,
    /// 1 / (the larger stream's total flow).
    scale: f64,
}

impl Model {
    fn n_in(&self) -> usize {
        self.a_in.len()
    }

    /// Constraint values and Jacobian at `v`.
    fn eval(&self, v: &DVector<f64>) -> (DVector<f64>, DMatrix<f64>) {
        let ne = self.w.len();
        let mut f = DVector::zeros(ne + 2);
        let mut j = DMatrix::zeros(ne + 2, v.len());
        for (side, atoms, base, sign) in [
            (0, &self.a_in, 0, 1.0),
            (1, &self.a_out, 2 + self.n_in(), -1.0),
        ] {
            let s = sign * self.scale;
            let (flow, water) = (v[base], v[base + 1]);
            for e in 0..ne {
                let per_mol: f64 = (0..atoms.len())
                    .map(|k| atoms[k][e] * v[base + 2 + k])
                    .sum();
                f[e] += s * (flow * per_mol + self.w[e] * water);
                j[(e, base)] = s * per_mol;
                j[(e, base + 1)] = s * self.w[e];
                for k in 0..atoms.len() {
                    j[(e, base + 2 + k)] = s * flow * atoms[k][e];
                }
            }
            let row = ne + side;
            f[row] = (0..atoms.len()).map(|k| v[base + 2 + k]).sum::<f64>() - 1.0;
            for k in 0..atoms.len() {
                j[(row, base + 2 + k)] = 1.0;
            }
        }
        (f, j)
    }
}

fn non_physical(tag: &str, what: impl Into<String>) -> ReconcileError {
    ReconcileError::NonPhysical {
        tag: tag.to_string(),
        what: what.into(),
    }
}

/// Checks one quantity and returns (value or NaN for "no guess", role).
fn read(q: &Quantity, is_fraction: bool) -> Result<(f64, Role), ReconcileError> {
    let check = |x: f64, what: &str| -> Result<f64, ReconcileError> {
        if !x.is_finite() {
            return Err(non_physical(
                &q.tag,
                format!("{what} is not a finite number"),
            ));
        }
        if x < 0.0 {
            return Err(non_physical(&q.tag, format!("negative {what} {x}")));
        }
        if is_fraction && x > 1.0 {
            return Err(non_physical(&q.tag, format!("mole fraction {x} above 1")));
        }
        Ok(x)
    };
    match q.reading {
        Reading::Measured { value, sigma } => {
            let value = check(value, "value")?;
            if !(sigma.is_finite() && sigma > 0.0) {
                return Err(non_physical(&q.tag, format!("standard deviation {sigma}")));
            }
            Ok((value, Role::Measured { sigma }))
        }
        Reading::Unmeasured { guess: Some(g) } => Ok((check(g, "guess")?, Role::Unmeasured)),
        Reading::Unmeasured { guess: None } => Ok((f64::NAN, Role::Unmeasured)),
    }
}

impl Variables {
    fn push(&mut self, value: f64, role: Role, tag: &str) {
        self.values.push(value);
        self.roles.push(role);
        self.tags.push(tag.to_string());
    }

    fn push_quantity(&mut self, q: &Quantity, is_fraction: bool) -> Result<(), ReconcileError> {
        let (v, r) = read(q, is_fraction)?;
        self.push(v, r, &q.tag);
        Ok(())
    }
}

/// Reads one stream into `vars` (appending) and returns its species indices.
fn read_stream(s: &Stream, vars: &mut Variables) -> Result<Vec<usize>, ReconcileError> {
    if s.dry.is_empty() {
        return Err(non_physical(&s.dry_flow.tag, "stream has no dry analysis"));
    }
    vars.push_quantity(&s.dry_flow, false)?;
    match &s.water {
        Some(w) => vars.push_quantity(w, false)?,
        None => vars.push(0.0, Role::Fixed, ""),
    }
    let mut species = Vec::with_capacity(s.dry.len());
    for (i, q) in &s.dry {
        if species.contains(i) {
            return Err(non_physical(&q.tag, "species listed twice in one analysis"));
        }
        species.push(*i);
        vars.push_quantity(q, true)?;
    }
    Ok(species)
}

/// Starting values for unmeasured quantities without a guess.
fn fill_guesses(vars: &mut Variables, n_in: usize) {
    let out = 2 + n_in;
    let v = &mut vars.values;
    for (flow, other) in [(0, out), (out, 0)] {
        if v[flow].is_nan() {
            v[flow] = if v[other].is_nan() { 1.0 } else { v[other] };
        }
    }
    for w in [1, out + 1] {
        if v[w].is_nan() {
            v[w] = 0.0;
        }
    }
    for range in [2..out, out + 2..v.len()] {
        let known: f64 = v[range.clone()].iter().filter(|x| !x.is_nan()).sum();
        let unknown = v[range.clone()].iter().filter(|x| x.is_nan()).count();
        let fill = ((1.0 - known) / unknown.max(1) as f64).clamp(1e-6, 1.0);
        for x in &mut v[range] {
            if x.is_nan() {
                *x = fill;
            }
        }
    }
}

// ---------------------------------------------------------------------------------------
// Weighted least squares with Crowe's projection

/// Q₁, Q₂ and R₁ of the column-scaled B, and the column scale.
struct Projection {
    q1: DMatrix<f64>,
    q2: DMatrix<f64>,
    r1: DMatrix<f64>,
    col_scale: DVector<f64>,
}

impl Projection {
    /// The least-squares solution of B δu = y (exact when y is in the range of B):
    /// δu = D R₁⁻¹ Q₁ᵀ y.
    fn unmeasured_step(&self, y: &DVector<f64>) -> Option<DVector<f64>> {
        let z = self.r1.solve_upper_triangular(&(self.q1.transpose() * y))?;
        Some(z.component_mul(&self.col_scale))
    }
}

/// Crowe's projection of B; names the unmeasured quantities B cannot determine.
fn project(b: &DMatrix<f64>, tags: &[&str]) -> Result<Projection, ReconcileError> {
    let (m, n) = b.shape();
    if n == 0 {
        return Ok(Projection {
            q1: DMatrix::zeros(m, 0),
            q2: DMatrix::identity(m, m),
            r1: DMatrix::zeros(0, 0),
            col_scale: DVector::zeros(0),
        });
    }
    let mut col_scale = DVector::zeros(n);
    let mut bs = b.clone();
    for j in 0..n {
        let norm = b.column(j).norm();
        col_scale[j] = if norm > 0.0 { 1.0 / norm } else { 0.0 };
        bs.column_mut(j).scale_mut(col_scale[j]);
    }
    // Null space of B (zero rows padded so that V is square).
    let mut padded = DMatrix::zeros(m.max(n), n);
    padded.view_mut((0, 0), (m, n)).copy_from(&bs);
    let svd = padded.svd(false, true);
    let vt = svd
        .v_t
        .ok_or_else(|| ReconcileError::Singular("SVD of the unmeasured columns".into()))?;
    let mut bad: Vec<String> = Vec::new();
    for k in 0..n {
        if svd.singular_values[k] <= 1e-9 {
            for j in 0..n {
                let t = tags[j].to_string();
                if vt[(k, j)].abs() > 1e-6 && !bad.contains(&t) {
                    bad.push(t);
                }
            }
        }
    }
    if !bad.is_empty() {
        let order = |t: &String| tags.iter().position(|x| x == t);
        bad.sort_by_key(order);
        return Err(ReconcileError::Undeterminable { tags: bad });
    }
    // Full Q from the QR of [B | 0] (m × m); its first n columns span B.
    let mut square = DMatrix::zeros(m, m);
    square.view_mut((0, 0), (m, n)).copy_from(&bs);
    let qr = square.qr();
    let q = qr.q();
    let r = qr.r();
    let q2 = q.columns(n, m - n).into_owned();
    if (q2.transpose() * &bs).amax() > 1e-9 {
        return Err(ReconcileError::Singular(
            "projection of the unmeasured quantities".into(),
        ));
    }
    Ok(Projection {
        q1: q.columns(0, n).into_owned(),
        q2,
        r1: r.view((0, 0), (n, n)).into_owned(),
        col_scale,
    })
}

/// The linearised problem at one point.
struct Linear {
    f: DVector<f64>,
    a: DMatrix<f64>,
    proj: Projection,
    /// Independent projected constraints G (ν × measured) and their residual r.
    g: DMatrix<f64>,
    r: DVector<f64>,
}

/// Rows of `g` reduced to an orthonormal basis of its row space (in Σ^½ metric).
fn independent_rows(g: &DMatrix<f64>, sigma: &DVector<f64>) -> DMatrix<f64> {
    let (rows, cols) = g.shape();
    if rows == 0 || cols == 0 {
        return DMatrix::zeros(0, rows);
    }
    let mut gs = g.clone();
    for j in 0..cols {
        gs.column_mut(j).scale_mut(sigma[j]);
    }
    let svd = gs.svd(true, false);
    let Some(u) = svd.u else {
        return DMatrix::zeros(0, rows);
    };
    let s_max = svd.singular_values.iter().fold(0.0f64, |a, &s| a.max(s));
    let keep: Vec<usize> = (0..svd.singular_values.len())
        .filter(|&k| s_max > 0.0 && svd.singular_values[k] > 1e-10 * s_max)
        .collect();
    DMatrix::from_fn(keep.len(), rows, |i, r| u[(r, keep[i])])
}

/// Constraint values and Jacobian at a point.
type Linearisation = (DVector<f64>, DMatrix<f64>);

/// The estimation problem: measured values, σ, and the index sets.
struct Wls<'a> {
    model: &'a dyn Fn(&DVector<f64>) -> Linearisation,
    measured: Vec<usize>,
    unmeasured: Vec<usize>,
    x_meas: DVector<f64>,
    sigma: DVector<f64>,
    tags: Vec<String>,
}

fn columns(j: &DMatrix<f64>, idx: &[usize]) -> DMatrix<f64> {
    DMatrix::from_fn(j.nrows(), idx.len(), |r, c| j[(r, idx[c])])
}

impl Wls<'_> {
    fn linearise(&self, v: &DVector<f64>) -> Result<Linear, ReconcileError> {
        let (f, jac) = (self.model)(v);
        let a = columns(&jac, &self.measured);
        let b = columns(&jac, &self.unmeasured);
        let tags: Vec<&str> = self
            .unmeasured
            .iter()
            .map(|&i| self.tags[i].as_str())
            .collect();
        let proj = project(&b, &tags)?;
        let x_k = DVector::from_fn(self.measured.len(), |i, _| v[self.measured[i]]);
        let c = &f + &a * (&self.x_meas - x_k);
        let g0 = proj.q2.transpose() * &a;
        let t = independent_rows(&g0, &self.sigma);
        let g = &t * g0;
        let r = &t * (proj.q2.transpose() * c);
        Ok(Linear { f, a, proj, g, r })
    }

    /// (G Σ Gᵀ) Cholesky-solved against `rhs`.
    fn m_solve(&self, lin: &Linear, rhs: &DVector<f64>) -> Result<DVector<f64>, ReconcileError> {
        let var = self.sigma.map(|s| s * s);
        let gs = DMatrix::from_fn(lin.g.nrows(), lin.g.ncols(), |i, j| lin.g[(i, j)] * var[j]);
        let m = &gs * lin.g.transpose();
        let chol = m
            .cholesky()
            .ok_or_else(|| ReconcileError::Singular("G Σ Gᵀ is not positive definite".into()))?;
        Ok(chol.solve(rhs))
    }

    /// One Gauss–Newton step from `v`; returns the new point and the measured step in σ.
    fn step(&self, v: &DVector<f64>, lin: &Linear) -> Result<(DVector<f64>, f64), ReconcileError> {
        let lambda = self.m_solve(lin, &lin.r)?;
        let var = self.sigma.map(|s| s * s);
        let x_hat = &self.x_meas - (lin.g.transpose() * lambda).component_mul(&var);
        let x_k = DVector::from_fn(self.measured.len(), |i, _| v[self.measured[i]]);
        let y = -(&lin.f + &lin.a * (&x_hat - &x_k));
        let du = lin
            .proj
            .unmeasured_step(&y)
            .ok_or_else(|| ReconcileError::Singular("R₁ of the unmeasured quantities".into()))?;
        let mut next = v.clone();
        let mut moved = 0.0f64;
        for (i, &k) in self.measured.iter().enumerate() {
            moved = moved.max((x_hat[i] - v[k]).abs() / self.sigma[i]);
            next[k] = x_hat[i];
        }
        for (i, &k) in self.unmeasured.iter().enumerate() {
            next[k] += du[i];
        }
        Ok((next, moved))
    }
}

/// The converged point and what the tests need.
struct WlsSolution {
    v: DVector<f64>,
    /// Variance of each measured estimate and of its adjustment; of each unmeasured one.
    var_measured: Vec<f64>,
    var_adjustment: Vec<f64>,
    /// Covariance of the adjustments, V.
    cov_adjustment: DMatrix<f64>,
    var_unmeasured: Vec<f64>,
    gamma: f64,
    dof: usize,
    iterations: u32,
    residual_norm: f64,
}

fn solve_wls(p: &Wls, start: DVector<f64>, o: &Options) -> Result<WlsSolution, ReconcileError> {
    let mut v = start;
    let mut moved = f64::INFINITY;
    for it in 0..=o.max_iterations {
        let lin = p.linearise(&v)?;
        let residual = lin.f.norm();
        if !residual.is_finite() {
            return Err(ReconcileError::NoConvergence {
                iterations: it,
                residual,
            });
        }
        if it > 0 && residual <= o.residual_tolerance && moved <= o.step_tolerance {
            return statistics(p, v, &lin, it);
        }
        if it == o.max_iterations {
            return Err(ReconcileError::NoConvergence {
                iterations: it,
                residual,
            });
        }
        (v, moved) = p.step(&v, &lin)?;
    }
    Err(ReconcileError::NoConvergence {
        iterations: o.max_iterations,
        residual: f64::NAN,
    })
}

/// Covariances and the global statistic at the converged point.
fn statistics(
    p: &Wls,
    v: DVector<f64>,
    lin: &Linear,
    iterations: u32,
) -> Result<WlsSolution, ReconcileError> {
    let nx = p.measured.len();
    let var = p.sigma.map(|s| s * s);
    let gamma = if lin.g.nrows() > 0 {
        lin.r.dot(&p.m_solve(lin, &lin.r)?)
    } else {
        0.0
    };
    // V = Σ Gᵀ M⁻¹ G Σ, column by column.
    let mut v_adj = DMatrix::zeros(nx, nx);
    if lin.g.nrows() > 0 {
        for j in 0..nx {
            let col = p.m_solve(lin, &(lin.g.column(j) * var[j]))?;
            let vj = (lin.g.transpose() * col).component_mul(&var);
            v_adj.set_column(j, &vj);
        }
    }
    let cov_x = DMatrix::from_diagonal(&var) - &v_adj;
    // K = −D R₁⁻¹ Q₁ᵀ A, one measured column at a time.
    let nu = p.unmeasured.len();
    let mut k = DMatrix::zeros(nu, nx);
    for j in 0..nx {
        let col = lin
            .proj
            .unmeasured_step(&lin.a.column(j).into_owned())
            .ok_or_else(|| ReconcileError::Singular("R₁ of the unmeasured quantities".into()))?;
        k.set_column(j, &(-col));
    }
    let cov_u = &k * &cov_x * k.transpose();
    Ok(WlsSolution {
        v,
        var_measured: (0..nx).map(|i| cov_x[(i, i)].max(0.0)).collect(),
        var_adjustment: (0..nx).map(|i| v_adj[(i, i)].max(0.0)).collect(),
        cov_adjustment: v_adj,
        var_unmeasured: (0..nu).map(|i| cov_u[(i, i)].max(0.0)).collect(),
        gamma,
        dof: lin.g.nrows(),
        iterations,
        residual_norm: lin.f.norm(),
    })
}

// ---------------------------------------------------------------------------------------
// The reconciliation

/// The balances are homogeneous in the flows: without one measured flow (dry gas, steam or
/// water, on either side) they hold at every scale, zero included, and the least squares
/// would return zero flows that "close". Refused, naming the flows to measure.
fn no_scale_check(inlet: &Stream, outlet: &Stream) -> Result<(), ReconcileError> {
    let flows = || {
        [inlet, outlet]
            .into_iter()
            .flat_map(|s| std::iter::once(&s.dry_flow).chain(s.water.as_ref()))
    };
    if flows().any(|q| matches!(q.reading, Reading::Measured { .. })) {
        return Ok(());
    }
    Err(ReconcileError::Undeterminable {
        tags: flows().map(|q| q.tag.clone()).collect(),
    })
}

/// Reconciles an inlet and an outlet over their element balances and tests for gross
/// errors. Species indices refer to `db`.
pub fn reconcile(
    db: &SpeciesDb,
    inlet: &Stream,
    outlet: &Stream,
    options: &Options,
) -> Result<Reconciliation, ReconcileError> {
    if !(options.alpha > 0.0 && options.alpha < 1.0) {
        return Err(ReconcileError::InvalidOption(format!(
            "alpha {} outside (0, 1)",
            options.alpha
        )));
    }
    let mut vars = Variables {
        values: Vec::new(),
        roles: Vec::new(),
        tags: Vec::new(),
    };
    no_scale_check(inlet, outlet)?;
    let sp_in = read_stream(inlet, &mut vars)?;
    let sp_out = read_stream(outlet, &mut vars)?;
    fill_guesses(&mut vars, sp_in.len());
    let model = build_model(db, &sp_in, &sp_out, &vars)?;
    let eval = |v: &DVector<f64>| model.eval(v);
    let pick = |want: fn(&Role) -> bool| -> Vec<usize> {
        (0..vars.roles.len())
            .filter(|&i| want(&vars.roles[i]))
            .collect()
    };
    let measured = pick(|r| matches!(r, Role::Measured { .. }));
    let sigma: Vec<f64> = measured
        .iter()
        .map(|&i| match vars.roles[i] {
            Role::Measured { sigma } => sigma,
            _ => f64::NAN,
        })
        .collect();
    let wls = Wls {
        model: &eval,
        x_meas: DVector::from_fn(measured.len(), |i, _| vars.values[measured[i]]),
        sigma: DVector::from_vec(sigma),
        unmeasured: pick(|r| matches!(r, Role::Unmeasured)),
        measured,
        tags: vars.tags.clone(),
    };
    let start = DVector::from_vec(vars.values.clone());
    let sol = solve_wls(&wls, start, options)?;
    report(db, &wls, &vars, &sol, (&sp_in, &sp_out), options.alpha)
}

fn build_model(
    db: &SpeciesDb,
    sp_in: &[usize],
    sp_out: &[usize],
    vars: &Variables,
) -> Result<Model, ReconcileError> {
    let out = 2 + sp_in.len();
    let has_water = vars.roles[1] != Role::Fixed || vars.roles[out + 1] != Role::Fixed;
    let elements = elements_present(db, sp_in.iter().chain(sp_out).copied(), has_water)?;
    let atoms = |sp: &[usize]| -> Vec<Vec<f64>> {
        sp.iter()
            .map(|&i| elements.iter().map(|&e| db.get(i).atoms(e)).collect())
            .collect()
    };
    let v = &vars.values;
    let total = (v[0] + v[1]).max(v[out] + v[out + 1]);
    Ok(Model {
        a_in: atoms(sp_in),
        a_out: atoms(sp_out),
        w: elements.iter().map(|&e| water_atoms(e)).collect(),
        scale: if total > 0.0 { 1.0 / total } else { 1.0 },
    })
}

/// Stream values from the variable vector `v`.
fn stream_values(v: &[f64], base: usize, species: &[usize]) -> StreamValues {
    StreamValues {
        dry_flow: v[base],
        water: v[base + 1],
        dry: species
            .iter()
            .enumerate()
            .map(|(k, &i)| (i, v[base + 2 + k]))
            .collect(),
    }
}

/// Whether measurement `i` (index into the measured set) takes part in any balance:
/// V_ii is zero, up to rounding, for one that does not.
fn is_tested(p: &Wls, sol: &WlsSolution, i: usize) -> bool {
    sol.var_adjustment[i] > 1e-12 * p.sigma[i] * p.sigma[i]
}

/// Every quantity's estimate, and the largest failed measurement test (z, tag).
fn estimates(
    p: &Wls,
    vars: &Variables,
    sol: &WlsSolution,
    critical: f64,
) -> (Vec<Estimate>, Option<(f64, String)>) {
    let mut out = Vec::new();
    let mut suspect: Option<(f64, String)> = None;
    let (mut im, mut iu) = (0, 0);
    for k in 0..vars.roles.len() {
        let (measured, sigma, test) = match vars.roles[k] {
            Role::Fixed => continue,
            Role::Unmeasured => {
                iu += 1;
                (None, sol.var_unmeasured[iu - 1].sqrt(), None)
            }
            Role::Measured { .. } => {
                let i = im;
                im += 1;
                let adj = p.x_meas[i] - sol.v[k];
                let w = sol.var_adjustment[i];
                let test = is_tested(p, sol, i).then(|| MeasurementTest {
                    adjustment: adj,
                    adjustment_sigma: w.sqrt(),
                    z: adj.abs() / w.sqrt(),
                    critical,
                    failed: adj.abs() / w.sqrt() > critical,
                });
                (Some(p.x_meas[i]), sol.var_measured[i].sqrt(), test)
            }
        };
        if let Some(t) = test.filter(|t| t.failed) {
            if suspect.as_ref().is_none_or(|(z, _)| t.z > *z) {
                suspect = Some((t.z, vars.tags[k].clone()));
            }
        }
        out.push(Estimate {
            tag: vars.tags[k].clone(),
            measured,
            reconciled: sol.v[k],
            sigma,
            test,
        });
    }
    (out, suspect)
}

fn report(
    db: &SpeciesDb,
    p: &Wls,
    vars: &Variables,
    sol: &WlsSolution,
    (sp_in, sp_out): (&[usize], &[usize]),
    alpha: f64,
) -> Result<Reconciliation, ReconcileError> {
    let out = 2 + sp_in.len();
    let reconciled: Vec<f64> = sol.v.iter().copied().collect();
    let mut raw = reconciled.clone();
    for (i, &k) in p.measured.iter().enumerate() {
        raw[k] = p.x_meas[i];
    }
    let n_tests = (0..p.measured.len())
        .filter(|&i| is_tested(p, sol, i))
        .count();
    let critical = sidak_critical(alpha, n_tests.max(1))?;
    let (estimates, suspect) = estimates(p, vars, sol, critical);
    let global = if sol.dof > 0 {
        let crit = chi_square_upper(alpha, sol.dof)?;
        Some(GlobalTest {
            statistic: sol.gamma,
            dof: sol.dof,
            critical: crit,
            passed: sol.gamma <= crit,
        })
    } else {
        None
    };
    let suspect_equivalents = match &suspect {
        Some((_, tag)) => equivalents(p, sol, tag),
        None => Vec::new(),
    };
    let (inlet, outlet) = (
        stream_values(&reconciled, 0, sp_in),
        stream_values(&reconciled, out, sp_out),
    );
    let before_in = stream_values(&raw, 0, sp_in);
    let before_out = stream_values(&raw, out, sp_out);
    Ok(Reconciliation {
        estimates,
        closure_before: element_balance(db, &before_in, &before_out)?,
        closure_after: element_balance(db, &inlet, &outlet)?,
        inlet,
        outlet,
        global,
        suspect: suspect.map(|(_, t)| t),
        suspect_equivalents,
        iterations: sol.iterations,
        residual_norm: sol.residual_norm,
    })
}

/// Tested measurements whose adjustments correlate with `tag`'s at |ρ| > 1 − 1e-6.
fn equivalents(p: &Wls, sol: &WlsSolution, tag: &str) -> Vec<String> {
    let tag_of = |i: usize| &p.tags[p.measured[i]];
    let Some(j) = (0..p.measured.len()).find(|&i| tag_of(i) == tag) else {
        return Vec::new();
    };
    let v = &sol.cov_adjustment;
    (0..p.measured.len())
        .filter(|&i| i != j && is_tested(p, sol, i))
        .filter(|&i| v[(i, j)].abs() / (v[(i, i)] * v[(j, j)]).sqrt() > 1.0 - 1e-6)
        .map(|i| tag_of(i).clone())
        .collect()
}

// ---------------------------------------------------------------------------------------
// Distributions

/// ln Γ(a) for a positive multiple of ½, exactly by recursion from Γ(1) = 1, Γ(½) = √π.
fn ln_gamma_half(a: f64) -> f64 {
    let (mut x, mut acc) = if a.fract() == 0.0 {
        (1.0, 0.0)
    } else {
        (0.5, 0.5 * std::f64::consts::PI.ln())
    };
    while x < a - 0.25 {
        acc += f64::ln(x);
        x += 1.0;
    }
    acc
}

/// Upper regularised incomplete gamma Q(a, x) = Γ(a, x)/Γ(a), a a multiple of ½.
fn gamma_q(a: f64, x: f64) -> f64 {
    if x <= 0.0 {
        return 1.0;
    }
    let front = (a * x.ln() - x - ln_gamma_half(a)).exp();
    if x < a + 1.0 {
        // P(a, x) = front Σ xⁿ / (a (a+1) … (a+n)).
        let (mut term, mut sum, mut ap) = (1.0 / a, 1.0 / a, a);
        for _ in 0..1000 {
            ap += 1.0;
            term *= x / ap;
            sum += term;
            if term.abs() < sum.abs() * 1e-17 {
                break;
            }
        }
        (1.0 - front * sum).max(0.0)
    } else {
        // Q(a, x) = front / (x + 1 − a − 1(1 − a)/(x + 3 − a − 2(2 − a)/(x + 5 − a − …))),
        // evaluated by the modified Lentz method.
        let tiny = 1e-300;
        let mut b = x + 1.0 - a;
        let mut c = 1.0 / tiny;
        let mut d = 1.0 / b;
        let mut h = d;
        for i in 1..1000 {
            let an = -(i as f64) * (i as f64 - a);
            b += 2.0;
            d = an * d + b;
            d = if d.abs() < tiny { tiny } else { d };
            c = b + an / c;
            c = if c.abs() < tiny { tiny } else { c };
            d = 1.0 / d;
            let delta = d * c;
            h *= delta;
            if (delta - 1.0).abs() < 1e-16 {
                break;
            }
        }
        front * h
    }
}

/// The x > 0 with ln tail(x) = ln p on [0, hi], hi doubled until it brackets.
fn upper_tail_root(tail: impl Fn(f64) -> f64, p: f64, hi: f64) -> Option<f64> {
    let f = |x: f64| tail(x).ln() - p.ln();
    let mut hi = hi;
    for _ in 0..30 {
        if f(hi) < 0.0 {
            break;
        }
        hi *= 2.0;
    }
    match brent(f, 0.0, hi, 1e-13 * hi, 200) {
        RootOutcome::Converged { x, .. } => Some(x),
        _ => None,
    }
}

/// The χ²(ν) value exceeded with probability `alpha` (the 1 − α quantile).
fn chi_square_upper(alpha: f64, dof: usize) -> Result<f64, ReconcileError> {
    let a = dof as f64 / 2.0;
    upper_tail_root(|x| gamma_q(a, x / 2.0), alpha, 2.0 * dof as f64 + 20.0)
        .ok_or_else(|| ReconcileError::Singular(format!("χ² quantile, ν = {dof}")))
}

/// The z ≥ 0 a standard normal exceeds with probability `tail` (0 < tail ≤ ½):
/// 1 − Φ(z) = ½ erfc(z/√2) = ½ Q(½, z²/2).
fn normal_upper(tail: f64) -> Option<f64> {
    if !(tail > 0.0 && tail <= 0.5) {
        return None;
    }
    upper_tail_root(|z| 0.5 * gamma_q(0.5, z * z / 2.0), tail, 10.0)
}

/// Two-sided Šidák critical value for `n` tests at overall significance `alpha`.
fn sidak_critical(alpha: f64, n: usize) -> Result<f64, ReconcileError> {
    let beta = -f64::exp_m1(f64::ln_1p(-alpha) / n as f64);
    normal_upper(beta / 2.0)
        .ok_or_else(|| ReconcileError::Singular(format!("normal quantile for β = {beta}")))
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    // ---- distributions --------------------------------------------------------------

    #[test]
    fn chi_square_quantiles_match_the_printed_table() {
        // NIST/SEMATECH e-Handbook of Statistical Methods, §1.3.6.7.4, table of upper
        // critical values of the chi-square distribution (three decimals).
        for (dof, alpha, table) in [
            (1, 0.05, 3.841),
            (4, 0.05, 9.488),
            (10, 0.05, 18.307),
            (5, 0.01, 15.086),
            (2, 0.01, 9.210),
        ] {
            let x = chi_square_upper(alpha, dof).expect("quantile");
            assert!((x - table).abs() < 6e-4, "ν {dof} α {alpha}: {x}");
        }
        // ν = 2 in closed form: Q(1, x/2) = exp(−x/2), so x = −2 ln α [derived].
        let x = chi_square_upper(0.05, 2).expect("quantile");
        assert!((x + 2.0 * f64::ln(0.05)).abs() < 1e-9, "{x}");
    }

    #[test]
    fn normal_quantiles_match_the_printed_table() {
        // NIST/SEMATECH e-Handbook §1.3.6.7.1 (cumulative standard normal): Φ(1.96) = 0.9750,
        // Φ(2.576) ≈ 0.9950; and z² of the two-sided 5 % point is χ²₀.₉₅(1) [derived].
        let z = normal_upper(0.025).expect("z");
        assert!((z - 1.960).abs() < 5e-4, "{z}");
        assert!((normal_upper(0.005).expect("z") - 2.576).abs() < 5e-4);
        let chi = chi_square_upper(0.05, 1).expect("chi");
        assert!((z * z - chi).abs() < 1e-9, "{z} {chi}");
        // Šidák for one test is the plain two-sided point [derived from the definition].
        assert!((sidak_critical(0.05, 1).expect("z") - z).abs() < 1e-12);
        // … and for n tests it is the two-sided point at 1 − 0.95^(1/n); n = 10 gives
        // β = 0.005116, z ≈ 2.80 (from memory; cross-checked by the identity below).
        let zc = sidak_critical(0.05, 10).expect("z");
        let beta = 1.0 - 0.95f64.powf(0.1);
        assert!((0.5 * gamma_q(0.5, zc * zc / 2.0) - beta / 2.0).abs() < 1e-15);
        assert!((zc - 2.80).abs() < 0.01, "{zc}");
    }

    // ---- a linear network, hand-derived -----------------------------------------------

    /// Node 1: F1 = F2 + F3; node 2: F3 = F4 + F5; F5 unmeasured; σ = 1 (invented data).
    fn splitter() -> impl Fn(&DVector<f64>) -> (DVector<f64>, DMatrix<f64>) {
        |v: &DVector<f64>| {
            let f = DVector::from_vec(vec![v[0] - v[1] - v[2], v[2] - v[3] - v[4]]);
            let j = DMatrix::from_row_slice(
                2,
                5,
                &[1.0, -1.0, -1.0, 0.0, 0.0, 0.0, 0.0, 1.0, -1.0, -1.0],
            );
            (f, j)
        }
    }

    #[test]
    fn one_node_three_flows_equal_variances_share_the_residual() {
        // Hand derivation: F5 appears only at node 2, so the projection leaves node 1,
        // a = [1, −1, −1], r = 100 − 60 − 30 = 10, a Σ aᵀ = 3. Each flow moves by r/3 = 10/3
        // (F1 down, F2 and F3 up); γ = r²/3 = 100/3 with ν = 1. V = Σaᵀ(aΣaᵀ)⁻¹aΣ has
        // diagonal 1/3, so z = (10/3)/√(1/3) = 10/√3; F4 is in no projected balance (no test);
        // F5 = F3̂ − F4 = 33.333 − 20 = 13.333 with variance Var(F3̂) + Var(F4) = 2/3 + 1.
        let model = splitter();
        let tags: Vec<String> = ["F1", "F2", "F3", "F4", "F5"].map(String::from).to_vec();
        let wls = Wls {
            model: &model,
            measured: vec![0, 1, 2, 3],
            unmeasured: vec![4],
            x_meas: DVector::from_vec(vec![100.0, 60.0, 30.0, 20.0]),
            sigma: DVector::from_element(4, 1.0),
            tags,
        };
        let start = DVector::from_vec(vec![100.0, 60.0, 30.0, 20.0, 0.0]);
        let sol = solve_wls(&wls, start, &Options::default()).expect("solves");
        let third = 10.0 / 3.0;
        for (k, want) in [(0, 100.0 - third), (1, 60.0 + third), (2, 30.0 + third)] {
            assert!((sol.v[k] - want).abs() < 1e-9, "F{} {}", k + 1, sol.v[k]);
            assert!((sol.var_adjustment[k] - 1.0 / 3.0).abs() < 1e-12);
        }
        assert!((sol.v[3] - 20.0).abs() < 1e-12 && sol.var_adjustment[3] < 1e-12);
        assert!((sol.v[4] - (30.0 + third - 20.0)).abs() < 1e-9);
        assert!((sol.var_unmeasured[0] - 5.0 / 3.0).abs() < 1e-9);
        assert!((sol.gamma - 100.0 / 3.0).abs() < 1e-9 && sol.dof == 1);
        let z = third / (1.0f64 / 3.0).sqrt();
        assert!((z - 10.0 / 3.0f64.sqrt()).abs() < 1e-12);
    }

    // ---- a worked example from the literature ---------------------------------------------

    /// Heat exchanger with a bypass: S. Narasimhan, C. Jordache, Data Reconciliation and
    /// Gross Error Detection (2000), ch. 1. Stream 1 splits into 2 (through the exchanger,
    /// which becomes 4) and 3 (the bypass valve, which becomes 5); 4 and 5 mix into 6. Four
    /// nodes: F1 − F2 − F3 = 0, F2 − F4 = 0, F3 − F5 = 0, F4 + F5 − F6 = 0.
    fn exchanger_with_bypass() -> impl Fn(&DVector<f64>) -> (DVector<f64>, DMatrix<f64>) {
        #[rustfmt::skip]
        const A: [f64; 24] = [
            1.0, -1.0, -1.0,  0.0,  0.0,  0.0,
            0.0,  1.0,  0.0, -1.0,  0.0,  0.0,
            0.0,  0.0,  1.0,  0.0, -1.0,  0.0,
            0.0,  0.0,  0.0,  1.0,  1.0, -1.0,
        ];
        |v: &DVector<f64>| {
            let j = DMatrix::from_row_slice(4, 6, &A);
            (&j * v, j)
        }
    }

    /// The example's measurements: the six flows as the book gives them, all of unit
    /// variance, transcribed in the open benchmark collection of E. C. do Valle,
    /// github.com/EDSONCV/dr-ged-benchmarks, data_reconciliation/linear/scilab/P4/P4.sce.
    const BYPASS_MEASURED: [f64; 6] = [101.91, 64.45, 34.65, 64.20, 36.44, 98.88];

    fn bypass_problem<'a>(
        model: &'a dyn Fn(&DVector<f64>) -> Linearisation,
        measured: [f64; 6],
    ) -> Wls<'a> {
        Wls {
            model,
            measured: (0..6).collect(),
            unmeasured: Vec::new(),
            x_meas: DVector::from_row_slice(&measured),
            sigma: DVector::from_element(6, 1.0),
            tags: (1..=6).map(|k| format!("F{k}")).collect(),
        }
    }

    #[test]
    fn heat_exchanger_with_bypass_reproduces_the_published_reconciliation() {
        let model = exchanger_with_bypass();
        let wls = bypass_problem(&model, BYPASS_MEASURED);
        let start = DVector::from_row_slice(&BYPASS_MEASURED);
        let sol = solve_wls(&wls, start, &Options::default()).expect("solves");
        // Reconciled flows of the book's table for this example, to its two decimals
        // (from memory): 100.22, 64.50, 35.72, 64.50, 35.72, 100.22.
        let book = [100.22, 64.50, 35.72, 64.50, 35.72, 100.22];
        for (k, want) in book.iter().enumerate() {
            assert!(
                (sol.v[k] - want).abs() < 5e-3,
                "F{}: {} vs {want}",
                k + 1,
                sol.v[k]
            );
        }
        // Exactly, by hand [derived]: the balances force F2 = F4, F3 = F5, F1 = F6 =
        // F2 + F3, so with unit variances each pair's reconciled value is the least-squares
        // fit of two parameters p = F2̂, q = F3̂ to the six readings:
        // minimise (F1 − p − q)² + (F6 − p − q)² + (F2 − p)² + (F4 − p)² + (F3 − q)² + (F5 − q)².
        // Normal equations: 4p + 2q = F1 + F6 + F2 + F4 = 329.44,
        //                   2p + 4q = F1 + F6 + F3 + F5 = 271.88,
        // so p = (2·329.44 − 271.88)/6 = 64.50 and q = (2·271.88 − 329.44)/6 = 35.72, the
        // book's figures to the last digit.
        let (p, q) = (64.50, 35.72);
        let exact = [p + q, p, q, p, q, p + q];
        for k in 0..6 {
            assert!(
                (sol.v[k] - exact[k]).abs() < 1e-9,
                "F{}: {}",
                k + 1,
                sol.v[k]
            );
        }
        // No unmeasured flow, four independent balances: ν = 4. γ = Σ a² (unit σ) =
        // 1.69² + 0.05² + 1.07² + 0.30² + 0.72² + 1.34² = 6.4075 [derived from the above],
        // below χ²₀.₉₅(4) = 9.488 (NIST/SEMATECH table): no gross error at 5 %.
        assert_eq!(sol.dof, 4);
        assert!((sol.gamma - 6.4075).abs() < 1e-9, "γ {}", sol.gamma);
        // Var(a) = diag of Σ Aᵀ (A Σ Aᵀ)⁻¹ A Σ: every flow sits in a two-parameter fit of six
        // readings with the same leverage 1/3, so Var(a_k) = 1 − 1/3 = 2/3 [derived].
        for k in 0..6 {
            assert!((sol.var_adjustment[k] - 2.0 / 3.0).abs() < 1e-12);
        }
    }

    #[test]
    fn heat_exchanger_with_bypass_gross_error_on_the_exchanger_line_is_named() {
        // The same example with a 6σ bias added to F2 (invented). F2 and F4 are in series,
        // but they are not an equivalent pair: the two outer balances see F2 and F4 apart,
        // and Cov(a2, a4) = −1/3 against Var = 2/3 (correlation −½, from the hat matrix
        // of the two-parameter fit above [derived]). So the test names F2 and nobody with
        // it.
        let mut measured = BYPASS_MEASURED;
        measured[1] += 6.0;
        let model = exchanger_with_bypass();
        let wls = bypass_problem(&model, measured);
        let start = DVector::from_row_slice(&measured);
        let sol = solve_wls(&wls, start, &Options::default()).expect("solves");
        let crit = chi_square_upper(0.05, sol.dof).expect("quantile");
        assert!(sol.gamma > crit, "γ {} ≤ {crit}", sol.gamma);
        let zc = sidak_critical(0.05, 6).expect("critical");
        let z: Vec<f64> = (0..6)
            .map(|k| (measured[k] - sol.v[k]).abs() / sol.var_adjustment[k].sqrt())
            .collect();
        let top = (0..6)
            .max_by(|&i, &j| z[i].total_cmp(&z[j]))
            .expect("six tests");
        assert_eq!(top, 1, "largest z on F{}: {z:?}", top + 1);
        assert!(z[top] > zc, "{z:?} vs {zc}");
        let v = &sol.cov_adjustment;
        assert!((v[(1, 3)] + 1.0 / 3.0).abs() < 1e-12, "{}", v[(1, 3)]);
        assert!(equivalents(&wls, &sol, "F2").is_empty());
    }

    // ---- reactor data -------------------------------------------------------------------

    const SHIFT: [&str; 5] = ["H2", "N2", "CO", "CO2", "CH4"];

    /// A shift converter, true values: inlet and outlet moles per species (kmol/h, SHIFT
    /// order) and water.
    #[derive(Debug, Clone)]
    struct ShiftCase {
        inlet: [f64; 5],
        w_in: f64,
        outlet: [f64; 5],
        w_out: f64,
    }

    impl ShiftCase {
        /// Outlet moles and water, and a shift extent ξ (CO + H2O = CO2 + H2) to reverse.
        fn from_outlet(outlet: [f64; 5], w_out: f64, xi: f64) -> Self {
            let mut inlet = outlet;
            inlet[0] -= xi;
            inlet[2] += xi;
            inlet[3] -= xi;
            Self {
                inlet,
                w_in: w_out + xi,
                outlet,
                w_out,
            }
        }

        /// docs/domain.md §8 LTS outlet, 1000 kmol/h dry, reversed by ξ = 30 (invented).
        fn lts() -> Self {
            let dry = [61.0536, 18.98637, 0.28697, 19.38096, 0.2921];
            Self::from_outlet(dry.map(|p| 10.0 * p), 363.12, 30.0)
        }
    }

    fn idx(db: &SpeciesDb) -> Vec<usize> {
        SHIFT
            .iter()
            .map(|n| db.index_of(n).expect("built-in species"))
            .collect()
    }

    fn values(db: &SpeciesDb, moles: &[f64; 5], water: f64) -> StreamValues {
        let total: f64 = moles.iter().sum();
        StreamValues {
            dry_flow: total,
            dry: idx(db).into_iter().zip(moles.map(|n| n / total)).collect(),
            water,
        }
    }

    /// Relative σ of flows and absolute/relative σ of analyser readings (invented).
    fn sigma_flow(x: f64) -> f64 {
        0.01 * x
    }
    fn sigma_frac(y: f64) -> f64 {
        (0.01 * y).max(5e-4)
    }

    /// Which water flows are measured.
    #[derive(Clone, Copy)]
    struct WaterMeasured {
        inlet: bool,
        outlet: bool,
    }

    /// A measured stream from true values, each reading + `noise[j]` σ (j in tag order).
    fn stream(
        db: &SpeciesDb,
        s: &StreamValues,
        side: &str,
        water_measured: bool,
        noise: &[f64],
    ) -> Stream {
        let q =
            |tag: String, x: f64, sd: f64, j: usize| Quantity::measured(tag, x + noise[j] * sd, sd);
        let w = if water_measured {
            q(
                format!("FI-{side}02 steam"),
                s.water,
                sigma_flow(s.water),
                1,
            )
        } else {
            Quantity::unmeasured(format!("FI-{side}02 steam"))
        };
        Stream {
            dry_flow: q(
                format!("FI-{side}01"),
                s.dry_flow,
                sigma_flow(s.dry_flow),
                0,
            ),
            water: Some(w),
            dry: s
                .dry
                .iter()
                .enumerate()
                .map(|(k, &(i, y))| {
                    let tag = format!("AI-{side}03 {}", db.get(i).name);
                    (i, q(tag, y, sigma_frac(y), 2 + k))
                })
                .collect(),
        }
    }

    /// Measured inlet and outlet of `case`; `noise` holds 14 σ-multiples (7 per stream).
    fn measured(
        db: &SpeciesDb,
        case: &ShiftCase,
        wm: WaterMeasured,
        noise: &[f64],
    ) -> (Stream, Stream) {
        let (i, o) = (
            values(db, &case.inlet, case.w_in),
            values(db, &case.outlet, case.w_out),
        );
        (
            stream(db, &i, "1", wm.inlet, &noise[..7]),
            stream(db, &o, "2", wm.outlet, &noise[7..]),
        )
    }

    const STEAM_IN: WaterMeasured = WaterMeasured {
        inlet: true,
        outlet: false,
    };

    // ---- element balances ---------------------------------------------------------------

    #[test]
    fn lts_gas_with_a_reversed_shift_closes_every_element() {
        let db = SpeciesDb::builtin();
        let case = ShiftCase::lts();
        let (i, o) = (
            values(&db, &case.inlet, case.w_in),
            values(&db, &case.outlet, case.w_out),
        );
        let closure = element_balance(&db, &i, &o).expect("balance");
        let names: Vec<&str> = closure.iter().map(|c| c.element).collect();
        assert_eq!(names, ["H", "C", "N", "O"]);
        for c in &closure {
            assert!((c.closure - 1.0).abs() < 1e-9, "{c:?}");
            assert!(c.imbalance_pct.abs() < 1e-7, "{c:?}");
        }
        // Hand sums of docs/domain.md §8 at 1000 kmol/h dry, S/D 0.36312 [derived]:
        // C = 1000 (0.0028697 + 0.1938096 + 0.002921) = 199.6003;
        // O = 1000 (0.0028697 + 2 × 0.1938096) + 363.12 = 753.6089.
        let c = closure.iter().find(|c| c.element == "C").expect("C");
        assert!((c.out_kmol_h - 199.6003).abs() < 1e-9);
        let o_atoms = closure.iter().find(|c| c.element == "O").expect("O");
        assert!((o_atoms.out_kmol_h - 753.6089).abs() < 1e-9);
    }

    #[test]
    fn reformer_equilibrium_gas_closes_against_s_c_3_methane() {
        // docs/domain.md §8 reformer (equilibrium at 796 °C, 30 bar, from S/C 3.0 methane;
        // the case "reformer 796 degC 30 barg", feed CH4 1 + H2O 3, of
        // scripts/crosscheck_cantera.py; not run here): wet
        // mol % CH4 6.9245, H2O 38.8563, CO 6.0324, CO2 6.0179, H2 42.1689. Inlet: 100 kmol/h
        // CH4 and 300 kmol/h steam; outlet scaled so that its carbon is 100 kmol/h. The
        // published four decimals bound the closure to about 1e-5 [derived].
        let db = SpeciesDb::builtin();
        let out = reformer_outlet(&db);
        let ch4 = db.index_of("CH4").expect("CH4");
        let inlet = StreamValues {
            dry_flow: 100.0,
            dry: vec![(ch4, 1.0)],
            water: 300.0,
        };
        for c in element_balance(&db, &inlet, &out).expect("balance") {
            assert!((c.closure - 1.0).abs() < 2e-5, "{c:?}");
        }
        assert!((out.steam_to_dry().expect("S/D") - 0.63549).abs() < 1e-5);
    }

    /// The §8 reformer outlet scaled to 100 kmol/h carbon.
    fn reformer_outlet(db: &SpeciesDb) -> StreamValues {
        let wet_pct = [
            ("CH4", 6.9245),
            ("CO", 6.0324),
            ("CO2", 6.0179),
            ("H2", 42.1689),
        ];
        let h2o_pct = 38.8563;
        let carbon_pct = 6.9245 + 6.0324 + 6.0179;
        let wet_total = 100.0 * 100.0 / carbon_pct;
        let dry_pct = 100.0 - h2o_pct;
        let dry = wet_pct
            .iter()
            .map(|(n, p)| (db.index_of(n).expect("species"), p / dry_pct))
            .collect();
        StreamValues {
            dry_flow: wet_total * dry_pct / 100.0,
            dry,
            water: wet_total * h2o_pct / 100.0,
        }
    }

    // ---- reconciliation on consistent data ----------------------------------------------

    #[test]
    fn unmeasured_outlet_water_is_recovered_from_the_balance() {
        // docs/domain.md §8: LTS outlet S/D 0.36312; noise-free data, so nothing moves.
        let db = SpeciesDb::builtin();
        let (i, o) = measured(&db, &ShiftCase::lts(), STEAM_IN, &[0.0; 14]);
        let r = reconcile(&db, &i, &o, &Options::default()).expect("reconciles");
        let sd = r.outlet_steam_to_dry().expect("S/D");
        assert!((sd - 0.36312).abs() < 1e-9, "S/D {sd}");
        for c in r.closure_before.iter().chain(&r.closure_after) {
            assert!((c.closure - 1.0).abs() < 1e-9, "{c:?}");
        }
        let g = r.global.expect("redundant");
        // Six constraints (H, C, N, O, two sums) less one for the unmeasured water [derived].
        assert_eq!(g.dof, 5);
        assert!(g.statistic < 1e-12 && g.passed && r.suspect.is_none());
        // The inlet steam only meets the balances through W_in − W_out: no test.
        let steam = r.estimate("FI-102 steam").expect("steam");
        assert!(steam.test.is_none());
        let water = r.estimate("FI-202 steam").expect("water");
        assert!(water.measured.is_none() && water.sigma > 0.0);
        let y: f64 = r.outlet_dry_fractions().iter().map(|(_, y)| y).sum();
        assert!((y - 1.0).abs() < 1e-12);
    }

    #[test]
    fn unmeasured_inlet_steam_is_recovered_when_outlet_water_is_measured() {
        // Inlet of the reversed LTS case (ξ = 30 kmol/h, invented): water 363.12 + 30, dry
        // flow 1000 − 30 (H2 −30, CO +30, CO2 −30), so S/D_in = 393.12/970 [derived].
        let db = SpeciesDb::builtin();
        let case = ShiftCase::lts();
        let wm = WaterMeasured {
            inlet: false,
            outlet: true,
        };
        let (i, o) = measured(&db, &case, wm, &[0.0; 14]);
        let r = reconcile(&db, &i, &o, &Options::default()).expect("reconciles");
        let want = (363.12 + 30.0) / 970.0;
        let sd = r.inlet_steam_to_dry().expect("S/D");
        assert!((sd - want).abs() < 1e-9, "S/D {sd} want {want}");
    }

    #[test]
    fn reformer_outlet_flow_and_water_unmeasured() {
        // Both outlet flows from the balances; the outlet analysis (§8 dry) is measured.
        let db = SpeciesDb::builtin();
        let out = reformer_outlet(&db);
        let ch4 = db.index_of("CH4").expect("CH4");
        let inlet = Stream {
            dry_flow: Quantity::measured("FI-301", 100.0, 1.0),
            dry: vec![(ch4, Quantity::measured("AI-301 CH4", 1.0, 0.001))],
            water: Some(Quantity::measured("FI-302", 300.0, 3.0)),
        };
        let outlet = Stream {
            dry_flow: Quantity::unmeasured("FI-401"),
            water: Some(Quantity::unmeasured("FI-402")),
            dry: out
                .dry
                .iter()
                .map(|&(i, y)| (i, Quantity::measured(format!("AI-401 {i}"), y, 0.002)))
                .collect(),
        };
        let r = reconcile(&db, &inlet, &outlet, &Options::default()).expect("reconciles");
        // docs/domain.md §8 S/D 0.63549; the published 4-decimal data leave ~1e-4.
        let sd = r.outlet_steam_to_dry().expect("S/D");
        assert!((sd - 0.63549).abs() < 2e-4, "S/D {sd}");
        for c in &r.closure_after {
            assert!((c.closure - 1.0).abs() < 1e-9, "{c:?}");
        }
        assert!(r.global.is_some_and(|g| g.passed));
    }

    // ---- errors ---------------------------------------------------------------------------

    #[test]
    fn both_water_flows_unmeasured_cannot_be_determined() {
        let db = SpeciesDb::builtin();
        let wm = WaterMeasured {
            inlet: false,
            outlet: false,
        };
        let (i, o) = measured(&db, &ShiftCase::lts(), wm, &[0.0; 14]);
        let err = reconcile(&db, &i, &o, &Options::default()).expect_err("undeterminable");
        assert_eq!(
            err,
            ReconcileError::Undeterminable {
                tags: vec!["FI-102 steam".into(), "FI-202 steam".into()]
            }
        );
        assert!(err.to_string().contains("FI-102 steam, FI-202 steam"));
    }

    #[test]
    fn no_flow_measured_at_all_is_undeterminable_not_zero() {
        // The balances are homogeneous in the flows: with no dry-gas, steam or water flow
        // measured they hold at any scale, zero included, and a solver happily returns
        // zero flows that "close" (found by the balance command; inputs from its report:
        // the LTS construction, dry, both flows unmeasured).
        let db = SpeciesDb::builtin();
        let ix = |n: &str| db.index_of(n).expect("species");
        let analysis = |tag: &str, y: &[(&str, f64)]| -> Vec<(usize, Quantity)> {
            y.iter()
                .map(|&(n, v)| (ix(n), Quantity::measured(format!("{tag} {n}"), v, 1e-3)))
                .collect()
        };
        let inlet = Stream {
            dry_flow: Quantity::unmeasured("FI-1"),
            dry: analysis(
                "AI-1",
                &[
                    ("CO", 0.03),
                    ("CO2", 0.15),
                    ("H2", 0.60),
                    ("N2", 0.215),
                    ("CH4", 0.005),
                ],
            ),
            water: None,
        };
        let f = 1025.0;
        let outlet = Stream {
            dry_flow: Quantity::unmeasured("FI-2"),
            dry: analysis(
                "AI-2",
                &[
                    ("CO", 5.0 / f),
                    ("CO2", 175.0 / f),
                    ("H2", 625.0 / f),
                    ("N2", 215.0 / f),
                    ("CH4", 5.0 / f),
                ],
            ),
            water: None,
        };
        let err = reconcile(&db, &inlet, &outlet, &Options::default()).expect_err("no scale");
        assert_eq!(
            err,
            ReconcileError::Undeterminable {
                tags: vec!["FI-1".into(), "FI-2".into()]
            }
        );
    }

    #[test]
    fn a_trace_reconciled_below_zero_is_reported() {
        // Unbounded least squares next to a gross error can take a trace below zero
        // (invented methanator, from the balance command's report): the outlet CH4
        // analyser reads 20 % high, and outlet CO, 1e-12, has nowhere to go but down.
        let db = SpeciesDb::builtin();
        let ix = |n: &str| db.index_of(n).expect("species");
        let q = |tag: &str, v: f64, rel: f64| Quantity::measured(tag, v, (rel * v).max(2e-4));
        let inlet = Stream {
            dry_flow: q("FI-1", 1000.0, 0.01),
            dry: [("CO", 0.003), ("CH4", 0.007), ("H2", 0.74), ("N2", 0.25)]
                .iter()
                .map(|&(n, v)| (ix(n), q(&format!("AI-1 {n}"), v, 0.01)))
                .collect(),
            water: Some(q("FI-1 steam", 1.0, 0.01)),
        };
        let out = 991.0;
        let outlet = Stream {
            dry_flow: q("FI-2", out, 0.01),
            dry: [
                ("CO", 1e-12),
                ("CH4", 1.2 * 10.0 / out),
                ("H2", 731.0 / out),
                ("N2", 250.0 / out),
            ]
            .iter()
            .map(|&(n, v)| (ix(n), q(&format!("AI-2 {n}"), v, 0.01)))
            .collect(),
            water: Some(q("FI-2 water", 4.0, 0.01)),
        };
        let rec = reconcile(&db, &inlet, &outlet, &Options::default()).expect("solves");
        let low = rec.below_zero();
        assert!(low.contains(&"AI-2 CO"), "{low:?}");
        // A consistent case has none.
        let (i, o) = measured(&db, &ShiftCase::lts(), STEAM_IN, &[0.0; 14]);
        let rec = reconcile(&db, &i, &o, &Options::default()).expect("solves");
        assert!(rec.below_zero().is_empty());
    }

    #[test]
    fn non_physical_inputs_name_the_tag() {
        let db = SpeciesDb::builtin();
        let (good_in, good_out) = measured(&db, &ShiftCase::lts(), STEAM_IN, &[0.0; 14]);
        type Spoil = fn(&mut Stream);
        let cases: [(Spoil, &str); 4] = [
            (
                |s| {
                    s.dry_flow.reading = Reading::Measured {
                        value: -1.0,
                        sigma: 1.0,
                    }
                },
                "FI-101",
            ),
            (
                |s| {
                    s.dry[2].1.reading = Reading::Measured {
                        value: 1.2,
                        sigma: 0.01,
                    }
                },
                "AI-103 CO",
            ),
            (
                |s| {
                    s.dry[0].1.reading = Reading::Measured {
                        value: f64::NAN,
                        sigma: 0.01,
                    }
                },
                "AI-103 H2",
            ),
            (
                |s| {
                    s.dry_flow.reading = Reading::Measured {
                        value: 10.0,
                        sigma: 0.0,
                    }
                },
                "FI-101",
            ),
        ];
        for (spoil, tag) in cases {
            let mut i = good_in.clone();
            spoil(&mut i);
            match reconcile(&db, &i, &good_out, &Options::default()) {
                Err(ReconcileError::NonPhysical { tag: t, .. }) => assert_eq!(t, tag),
                other => panic!("{tag}: {other:?}"),
            }
        }
    }

    // ---- gross errors -----------------------------------------------------------------------

    /// Tiny deterministic generator for the fixed-seed batch (SplitMix64, invented seed).
    struct SplitMix(u64);
    impl SplitMix {
        fn uniform(&mut self) -> f64 {
            self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
            let mut z = self.0;
            z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
            z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
            ((z ^ (z >> 31)) >> 11) as f64 / (1u64 << 53) as f64
        }
        fn normal(&mut self) -> f64 {
            // Box–Muller.
            let u = self.uniform().max(1e-300);
            (-2.0 * u.ln()).sqrt() * (std::f64::consts::TAU * self.uniform()).cos()
        }
    }

    /// An invented HTS-exit/LTS-inlet case from unit-interval draws `u`.
    fn random_case(u: &[f64; 5]) -> ShiftCase {
        let dry = [0.60, 0.20, 0.03 + 0.03 * u[0], 0.14, 0.004];
        let f_in = 500.0 + 4500.0 * u[1];
        let total: f64 = dry.iter().sum();
        let inlet = dry.map(|y| f_in * y / total);
        let w_in = f_in * (0.3 + 0.3 * u[2]);
        let xi = inlet[2] * (0.5 + 0.45 * u[3]);
        let mut outlet = inlet;
        outlet[0] += xi;
        outlet[2] -= xi;
        outlet[3] += xi;
        let _ = u[4];
        ShiftCase {
            inlet,
            w_in,
            outlet,
            w_out: w_in - xi,
        }
    }

    /// The suspect is `tag`, or `tag` is in the suspect's equivalent set.
    fn attributed(r: &Reconciliation, tag: &str) -> bool {
        r.suspect.as_deref() == Some(tag) || r.suspect_equivalents.iter().any(|t| t == tag)
    }

    /// Tag positions in `noise` order: 0 dry flow, 1 water, 2.. analysis (per stream).
    fn tag_of(r: &Reconciliation, j: usize) -> String {
        // Estimates are in the same order as the noise vector (both waters exist here).
        r.estimates[j].tag.clone()
    }

    /// The redundant measurements (those with a test) of the noise-free case.
    fn redundant(db: &SpeciesDb, case: &ShiftCase) -> Vec<(usize, f64)> {
        let (i, o) = measured(db, case, STEAM_IN, &[0.0; 14]);
        let r = reconcile(db, &i, &o, &Options::default()).expect("reconciles");
        r.estimates
            .iter()
            .enumerate()
            .filter_map(|(j, e)| {
                let t = e.test?;
                let sd = match r_sigma(&i, &o, j) {
                    Some(s) => s,
                    None => return None,
                };
                Some((j, sd * sd / t.adjustment_sigma))
            })
            .collect()
    }

    /// σ of the j-th quantity (noise order).
    fn r_sigma(i: &Stream, o: &Stream, j: usize) -> Option<f64> {
        let all: Vec<&Quantity> = [i, o]
            .iter()
            .flat_map(|s| {
                std::iter::once(&s.dry_flow)
                    .chain(s.water.as_ref())
                    .chain(s.dry.iter().map(|(_, q)| q))
            })
            .collect();
        match all.get(j)?.reading {
            Reading::Measured { sigma, .. } => Some(sigma),
            Reading::Unmeasured { .. } => None,
        }
    }

    /// Attribution over a fixed batch: 200 invented cases, 1 σ normal noise on every
    /// measurement, and one gross error on a redundant measurement chosen at random, of
    /// 8 adjustment-σ (δ = 8 σ²/√V_jj, `adjusted`) or of 8 raw σ. Returns (hits, cases).
    fn batch_attribution(adjusted: bool) -> (usize, usize) {
        let db = SpeciesDb::builtin();
        let mut rng = SplitMix(20_240_607);
        let (mut hits, n) = (0, 200);
        for _ in 0..n {
            let u = [0; 5].map(|_: i32| rng.uniform());
            let case = random_case(&u);
            let tests = redundant(&db, &case);
            let (pick, delta) = tests[(rng.uniform() * tests.len() as f64) as usize % tests.len()];
            let mut noise = [0.0; 14];
            for x in &mut noise {
                *x = rng.normal();
            }
            let sd = {
                let (i, o) = measured(&db, &case, STEAM_IN, &[0.0; 14]);
                r_sigma(&i, &o, pick).expect("measured")
            };
            noise[pick] += if adjusted { 8.0 * delta / sd } else { 8.0 };
            let (i, o) = measured(&db, &case, STEAM_IN, &noise);
            let r = reconcile(&db, &i, &o, &Options::default()).expect("reconciles");
            if attributed(&r, &tag_of(&r, pick)) {
                hits += 1;
            }
        }
        (hits, n)
    }

    #[test]
    fn an_8_sigma_error_is_attributed_in_a_fixed_seed_batch() {
        // The batch is deterministic (fixed seed), so these rates are properties of this
        // batch, not chance outcomes; the thresholds sit a little under the observed rates
        // (196/200 and 122/200) to allow for last-bit differences between platforms.
        // An error of 8 adjustment-σ gives E z = 8 on the faulty meter and less on every
        // other (Cauchy–Schwarz on V), so noise rarely moves the maximum.
        let (hits, n) = batch_attribution(true);
        assert!(hits * 100 >= 95 * n, "attributed {hits} of {n}");
        // 8 raw σ is much weaker on the poorly redundant meters (E z_j = 8 √(V_jj)/σ_j,
        // e.g. about 0.6 for the H2 analysers here), so the rate is far lower.
        let (hits, n) = batch_attribution(false);
        assert!(hits * 100 >= 55 * n, "attributed {hits} of {n}");
    }

    fn unit() -> impl Strategy<Value = f64> {
        0.0..1.0f64
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(64))]

        #[test]
        fn reconciled_values_close_the_balances(
            u in proptest::array::uniform5(unit()),
            noise in proptest::array::uniform14(-2.0..2.0f64),
        ) {
            let db = SpeciesDb::builtin();
            let case = random_case(&u);
            let (i, o) = measured(&db, &case, STEAM_IN, &noise);
            let r = reconcile(&db, &i, &o, &Options::default()).expect("reconciles");
            for c in &r.closure_after {
                prop_assert!((c.closure - 1.0).abs() < 1e-9, "{:?}", c);
            }
            // The global statistic is the weighted sum of squared adjustments [derived:
            // at the solution r = G a and a = Σ Gᵀ M⁻¹ r].
            let ss: f64 = r.estimates.iter().zip(0..).filter_map(|(e, j)| {
                let sd = r_sigma(&i, &o, j)?;
                Some(((e.measured? - e.reconciled) / sd).powi(2))
            }).sum();
            let g = r.global.expect("redundant");
            prop_assert!((g.statistic - ss).abs() < 1e-6 * ss.max(1.0), "{} {}", g.statistic, ss);
        }

        #[test]
        fn a_clear_gross_error_on_noise_free_data_is_attributed(
            u in proptest::array::uniform5(unit()),
            which in 0usize..64,
        ) {
            // Noise-free data and an error of 8 adjustment-σ (δ = 8 σ² / √V_jj on
            // measurement j): then E z_j = 8 and every other z_i ≤ z_j by Cauchy–Schwarz
            // (|V_ij| ≤ √(V_ii V_jj)), so with no noise the attribution is certain unless two
            // measurements are indistinguishable [derived; Narasimhan & Jordache ch. 7].
            let db = SpeciesDb::builtin();
            let case = random_case(&u);
            let tests = redundant(&db, &case);
            let (j, delta) = tests[which % tests.len()];
            let mut noise = [0.0; 14];
            let sd = {
                let (i, o) = measured(&db, &case, STEAM_IN, &noise);
                r_sigma(&i, &o, j).expect("measured")
            };
            noise[j] = 8.0 * delta / sd;
            let (i, o) = measured(&db, &case, STEAM_IN, &noise);
            let r = reconcile(&db, &i, &o, &Options::default()).expect("reconciles");
            prop_assert!(attributed(&r, &tag_of(&r, j)), "{:?} {:?}", r.suspect, r.suspect_equivalents);
            prop_assert!(!r.global.expect("redundant").passed);
        }
    }

    #[test]
    fn the_two_dry_flow_meters_form_an_equivalent_set() {
        // With every analysis measured the element balances fix only F_out/F_in, and both
        // meters carry 1 % σ, so their adjustments are perfectly correlated: a gross error
        // in one cannot be told from one in the other [derived; Narasimhan & Jordache ch. 7
        // call such groups equivalent sets]. +10 σ on FI-201 of the LTS case (invented).
        let db = SpeciesDb::builtin();
        let mut noise = [0.0; 14];
        noise[7] = 10.0;
        let (i, o) = measured(&db, &ShiftCase::lts(), STEAM_IN, &noise);
        let r = reconcile(&db, &i, &o, &Options::default()).expect("reconciles");
        assert!(!r.global.expect("redundant").passed);
        assert!(attributed(&r, "FI-201"), "{:?}", r.suspect);
        let mut set = r.suspect_equivalents.clone();
        set.extend(r.suspect.clone());
        set.sort();
        assert_eq!(set, ["FI-101", "FI-201"]);
    }
}
