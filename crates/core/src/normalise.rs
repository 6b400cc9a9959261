//! The normalised approach: the approach to equilibrium less what a start-of-run
//! regression on the operating conditions says it should be, so that the drift statistics
//! see the catalyst and not the throughput, steam ratio, inlet temperature or pressure
//! (docs/domain.md §10 "Approach normalisation").
//!
//! A [`Learner`] takes (conditions, approach) samples over the learning window and keeps
//! only sufficient statistics; [`Learner::freeze`] fits ordinary least squares (OLS)
//! `approach ≈ b0 + Σ b_j x_j` over 1 to [`MAX_INPUTS`] context inputs and gives a
//! [`Model`] with its [`Fit`] statistics; [`Model::residual`] gives the residual and the
//! normalised approach of a new sample, or a [`Refusal`] when its conditions lie outside
//! what was learned. Nothing here reads a clock or does I/O; the caller decides when the
//! learning window ends. Persist the [`Learner`] (or the [`Model`], which serialises as its
//! learner and is fitted again, identically, when read back).
//!
//! # Method
//! - Accumulation: the means and the co-moment matrix of (x_1 … x_p, approach) are
//!   updated one sample at a time, m ← m + d/n, C ← C + (n−1)/n · d dᵀ with d = z − m_old
//!   (B. P. Welford, "Note on a method for calculating corrected sums of squares and
//!   products", Technometrics 4 (1962) 419). No sum of squares of raw values is ever
//!   formed, so an input such as a pressure of 30 bar ± 0.01 keeps its digits. Memory is
//!   O(p²) plus a fixed set of [`EXTREME_POINTS`] learning points (below).
//! - Fit: the normal equations in centred and scaled ("correlation") form, R b* = r with
//!   R_jk = C_jk/√(C_jj C_kk) and r_j = C_jy/√C_jj, solved by Cholesky; b_j = b*_j/√C_jj
//!   and b0 = ȳ − Σ b_j x̄_j. s² = SSE/(n−p−1) with SSE = C_yy − b*ᵀr; Var(b) = s² C⁻¹,
//!   Var(b0) = s² (1/n + x̄ᵀC⁻¹x̄); R² = 1 − SSE/C_yy, adjusted R² = 1 − (1−R²)(n−1)/(n−p−1)
//!   (D. C. Montgomery, E. A. Peck, G. G. Vining, Introduction to Linear Regression
//!   Analysis, ch. 3). SSE from the co-moments cancels when R² is near 1: it is good to
//!   about ε·C_yy, so s has a floor of about √(ε C_yy/(n−p−1)), far below analyser noise.
//! - Collinearity: κ = λ_max/λ_min of R. κ above 1000 is the usual mark of severe
//!   multicollinearity (Montgomery, Peck & Vining, §9.4; it is about the square of the
//!   condition index 30 of D. A. Belsley, E. Kuh, R. E. Welsch, Regression Diagnostics,
//!   1980; both from memory). Such a fit is refused, naming the inputs whose coefficient
//!   variance the smallest eigenvalue dominates (variance-decomposition proportion above
//!   0.5, Belsley, Kuh & Welsch 1980, from memory; always at least two inputs).
//! - Leverage: h0 = x0ᵀ(XᵀX)⁻¹x0 with the intercept column equals 1/n + (x0−x̄)ᵀC⁻¹(x0−x̄).
//!   The 95 % prediction interval is ŷ ± t_{n−p−1} s √(1 + h0) (Montgomery, Peck & Vining
//!   §3.5, section number from memory), t from the table in `monitor::drift`.
//! - Extrapolation: two checks, both with the configured margin m (default 10 %). Each
//!   input must lie within [min − m·span, max + m·span] of its learned range. And, for
//!   hidden extrapolation (Montgomery, Peck & Vining §3.8: a point inside every input's
//!   range but outside the cloud of correlated inputs), the Mahalanobis part of h0 must
//!   not exceed (1+m)² times that of the most outlying learning point, h_max − 1/n: the
//!   ellipsoid through that point, enlarged by m. With m = 0 this is the book's rule
//!   h0 ≤ h_max.
//! - h_max without the learning data: the leverage of the corners of the learned box would
//!   bound it from above, but for correlated inputs (throughput and steam ratio move
//!   together) the corners lie far outside the data and would accept exactly the hidden
//!   extrapolation the check is for. So the learner keeps the [`EXTREME_POINTS`] samples
//!   most outlying under its running statistics (each new sample joins; the least
//!   outlying one is dropped). At freeze h_max is the largest leverage among them under
//!   the final fit. It is an approximation from below (the refusal errs on the side of
//!   refusing): the true maximum is missed only if that sample was once the least outlying
//!   of [`EXTREME_POINTS`] + 1, which a stationary learning window makes unlikely.
//! - Normalised approach = residual + ȳ: the approach the unit would show at the learning
//!   window's mean conditions (where the fitted value is exactly ȳ).

use nalgebra::{DMatrix, DVector};
use serde::{Deserialize, Serialize};
use thiserror::Error;

use crate::monitor::drift::t95;

/// Most context inputs a regression takes.
pub const MAX_INPUTS: usize = 4;
/// Default smallest number of learning samples (raised to p + 10 when that is larger).
pub const DEFAULT_MIN_SAMPLES: u64 = 30;
/// Default extrapolation margin, a fraction of each learned span (and of the leverage
/// ellipsoid's radius).
pub const DEFAULT_MARGIN: f64 = 0.10;
/// Default limit of the condition number of the scaled correlation matrix.
pub const DEFAULT_CONDITION_LIMIT: f64 = 1e3;
/// Learning samples kept to find the largest learning leverage.
pub const EXTREME_POINTS: usize = 32;

/// A context input: its name (as the caller will name it in messages) and its unit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Input {
    pub name: String,
    pub unit: String,
}

impl Input {
    pub fn new(name: &str, unit: &str) -> Self {
        Self {
            name: name.to_owned(),
            unit: unit.to_owned(),
        }
    }
}

/// What to regress on and how strict to be.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Config {
    /// The context inputs, in the order their values are passed.
    pub inputs: Vec<Input>,
    /// Samples needed before a fit; at least p + 10.
    pub min_samples: u64,
    /// Extrapolation margin as a fraction (0.1 = 10 % of each learned span).
    pub margin: f64,
    /// Largest accepted condition number of the scaled correlation matrix.
    pub condition_limit: f64,
}

impl Config {
    /// The inputs with the default sample count, margin and condition limit.
    pub fn new(inputs: Vec<Input>) -> Self {
        let least = inputs.len() as u64 + 10;
        Self {
            inputs,
            min_samples: DEFAULT_MIN_SAMPLES.max(least),
            margin: DEFAULT_MARGIN,
            condition_limit: DEFAULT_CONDITION_LIMIT,
        }
    }

    /// Puts named values in the configured order.
    pub fn arrange(&self, named: &[(&str, f64)]) -> Result<Vec<f64>, SampleError> {
        if let Some((name, _)) = named
            .iter()
            .find(|(name, _)| !self.inputs.iter().any(|i| i.name == *name))
        {
            return Err(SampleError::Unknown((*name).to_owned()));
        }
        if named.len() != self.inputs.len() {
            return Err(SampleError::Count {
                expected: self.inputs.len(),
                got: named.len(),
            });
        }
        self.inputs
            .iter()
            .map(|i| {
                named
                    .iter()
                    .find(|(name, _)| *name == i.name)
                    .map(|(_, v)| *v)
                    .ok_or_else(|| SampleError::Missing(i.name.clone()))
            })
            .collect()
    }

    fn check(&self) -> Result<(), ConfigError> {
        let p = self.inputs.len();
        if p == 0 || p > MAX_INPUTS {
            return Err(ConfigError::InputCount(p));
        }
        for (k, input) in self.inputs.iter().enumerate() {
            if input.name.trim().is_empty() {
                return Err(ConfigError::EmptyName(k));
            }
            if self.inputs[..k]
                .iter()
                .any(|other| other.name == input.name)
            {
                return Err(ConfigError::DuplicateName(input.name.clone()));
            }
        }
        let least = p as u64 + 10;
        if self.min_samples < least {
            return Err(ConfigError::MinSamples {
                got: self.min_samples,
                least,
            });
        }
        if !(self.margin >= 0.0 && self.margin.is_finite()) {
            return Err(ConfigError::Margin(self.margin));
        }
        if !(self.condition_limit >= 1.0 && self.condition_limit.is_finite()) {
            return Err(ConfigError::ConditionLimit(self.condition_limit));
        }
        Ok(())
    }
}

/// A configuration or saved state that cannot be used.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum ConfigError {
    #[error("between 1 and {MAX_INPUTS} context inputs are needed, {0} given")]
    InputCount(usize),
    #[error("context input number {0} has no name")]
    EmptyName(usize),
    #[error("context input `{0}` is configured twice")]
    DuplicateName(String),
    #[error("min_samples {got} is below {least} (the number of inputs + 10)")]
    MinSamples { got: u64, least: u64 },
    #[error("the extrapolation margin must be a finite fraction ≥ 0, got {0}")]
    Margin(f64),
    #[error("the condition-number limit must be finite and ≥ 1, got {0}")]
    ConditionLimit(f64),
    #[error("saved learning state is inconsistent: {0}")]
    State(&'static str),
}

/// A sample that cannot be used (for learning or for a residual).
#[derive(Debug, Clone, PartialEq, Error)]
pub enum SampleError {
    #[error("{got} context values given, {expected} inputs configured")]
    Count { expected: usize, got: usize },
    #[error("context input `{0}` is not configured")]
    Unknown(String),
    #[error("context input `{0}` is missing")]
    Missing(String),
    #[error("context input `{input}` is not a finite number ({value})")]
    NonFinite { input: String, value: f64 },
    #[error("the approach is not a finite number ({0})")]
    NonFiniteApproach(f64),
    #[error("`{0}` is too large for the learning statistics (they would overflow)")]
    OutOfScale(String),
}

/// Why the learning statistics give no fit.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum FitError {
    #[error("too few samples to fit: {have} of {need}")]
    TooFewSamples { have: u64, need: u64 },
    #[error("context input `{input}` did not vary over the learning window (mean {mean})")]
    NoSpread { input: String, mean: f64 },
    #[error(
        "collinear context inputs {}: condition number {condition:.3e} of the scaled \
         correlation matrix exceeds {limit:.0e}",
        .inputs.join(", ")
    )]
    Collinear {
        inputs: Vec<String>,
        condition: f64,
        limit: f64,
    },
}

/// Why a sample gets no residual.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum Refusal {
    #[error(transparent)]
    Sample(#[from] SampleError),
    #[error(
        "context input `{input}` = {value} {unit} is outside the learned range {min} to \
         {max} {unit} (accepted from {low} to {high} with the margin)"
    )]
    OutsideRange {
        input: String,
        unit: String,
        value: f64,
        min: f64,
        max: f64,
        low: f64,
        high: f64,
    },
    #[error(
        "hidden extrapolation: leverage {leverage:.4} exceeds the learned limit {limit:.4} \
         (largest learning leverage {max_leverage:.4}) at {conditions}"
    )]
    HiddenExtrapolation {
        leverage: f64,
        limit: f64,
        max_leverage: f64,
        /// The sample's inputs, "`name` = value unit" joined by commas.
        conditions: String,
    },
}

/// One fitted coefficient (the approach's unit per the input's unit; the intercept is in
/// the approach's unit).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Coefficient {
    pub name: String,
    pub value: f64,
    pub std_error: f64,
}

/// An input's range over the learning window.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct InputRange {
    pub name: String,
    pub unit: String,
    pub min: f64,
    pub max: f64,
    pub mean: f64,
}

/// The fit statistics.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Fit {
    /// Learning samples and inputs; residual degrees of freedom n − p − 1.
    pub n: u64,
    pub p: usize,
    pub dof: u64,
    pub intercept: Coefficient,
    /// In the configured order of the inputs.
    pub coefficients: Vec<Coefficient>,
    /// None when the approach did not vary over the learning window.
    pub r_squared: Option<f64>,
    pub adjusted_r_squared: Option<f64>,
    /// Residual standard error s.
    pub residual_sd: f64,
    /// κ = λ_max/λ_min of the scaled correlation matrix of the inputs.
    pub condition_number: f64,
    pub ranges: Vec<InputRange>,
    /// Largest learning leverage found (see the module notes).
    pub max_leverage: f64,
    /// The fitted approach at the learning window's mean conditions (= mean approach).
    pub reference_approach: f64,
}

/// The normalised figures of one sample.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Normalised {
    /// The approach the regression expects at this sample's conditions.
    pub predicted: f64,
    /// Measured − predicted.
    pub residual: f64,
    /// Half width of the 95 % prediction interval about `predicted`.
    pub half_width_95: f64,
    /// h0 = x0ᵀ(XᵀX)⁻¹x0 with the intercept.
    pub leverage: f64,
    /// Residual + the reference approach: the figure to trend.
    pub normalised: f64,
}

/// The online regression's state over the learning window.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(try_from = "LearnerState")]
pub struct Learner {
    config: Config,
    n: u64,
    /// Means of the inputs then of the approach (p + 1).
    mean: Vec<f64>,
    /// Co-moments Σ(z_i − z̄_i)(z_j − z̄_j), row major, (p + 1)².
    comoment: Vec<f64>,
    min: Vec<f64>,
    max: Vec<f64>,
    /// The most outlying learning samples' inputs, at most [`EXTREME_POINTS`].
    extremes: Vec<Vec<f64>>,
}

/// A [`Learner`] as read, before its checks.
#[derive(Deserialize)]
struct LearnerState {
    config: Config,
    n: u64,
    mean: Vec<f64>,
    comoment: Vec<f64>,
    min: Vec<f64>,
    max: Vec<f64>,
    extremes: Vec<Vec<f64>>,
}

impl TryFrom<LearnerState> for Learner {
    type Error = ConfigError;

    fn try_from(s: LearnerState) -> Result<Self, ConfigError> {
        s.config.check()?;
        let p = s.config.inputs.len();
        let lengths = s.mean.len() == p + 1
            && s.comoment.len() == (p + 1) * (p + 1)
            && s.min.len() == p
            && s.max.len() == p
            && s.extremes.len() <= EXTREME_POINTS
            && s.extremes.iter().all(|e| e.len() == p);
        if !lengths {
            return Err(ConfigError::State("lengths do not match the inputs"));
        }
        let finite = s
            .mean
            .iter()
            .chain(&s.comoment)
            .chain(&s.min)
            .chain(&s.max)
            .chain(s.extremes.iter().flatten())
            .all(|v| v.is_finite());
        let ordered = s.min.iter().zip(&s.max).all(|(lo, hi)| lo <= hi);
        let diagonal = s.comoment.iter().step_by(p + 2).all(|c| *c >= 0.0);
        if !(finite && ordered && diagonal) {
            return Err(ConfigError::State("values out of range"));
        }
        if (s.n == 0) != s.extremes.is_empty() {
            return Err(ConfigError::State("sample count"));
        }
        Ok(Self {
            config: s.config,
            n: s.n,
            mean: s.mean,
            comoment: s.comoment,
            min: s.min,
            max: s.max,
            extremes: s.extremes,
        })
    }
}

/// Checks a sample against the inputs.
fn check_sample(inputs: &[Input], x: &[f64], approach: f64) -> Result<(), SampleError> {
    if x.len() != inputs.len() {
        return Err(SampleError::Count {
            expected: inputs.len(),
            got: x.len(),
        });
    }
    if let Some((input, value)) = inputs.iter().zip(x).find(|(_, v)| !v.is_finite()) {
        return Err(SampleError::NonFinite {
            input: input.name.clone(),
            value: *value,
        });
    }
    if !approach.is_finite() {
        return Err(SampleError::NonFiniteApproach(approach));
    }
    Ok(())
}

/// Row-major copy of a square matrix.
fn row_major(m: &DMatrix<f64>) -> Vec<f64> {
    let p = m.nrows();
    (0..p * p).map(|k| m[(k / p, k % p)]).collect()
}

/// The squared scaled distance zᵀR⁻¹z, z_j = (x_j − x̄_j)/scale_j.
#[derive(Debug, Clone, PartialEq)]
struct Metric {
    mean: Vec<f64>,
    /// √C_jj; 0 for an input without spread (it then does not count).
    scale: Vec<f64>,
    /// R⁻¹, row major.
    rinv: Vec<f64>,
}

impl Metric {
    fn radius2(&self, x: &[f64]) -> f64 {
        let z: Vec<f64> = x
            .iter()
            .zip(&self.mean)
            .zip(&self.scale)
            .map(|((v, m), s)| if *s > 0.0 { (v - m) / s } else { 0.0 })
            .collect();
        self.rinv
            .chunks(z.len().max(1))
            .zip(&z)
            .map(|(row, zi)| zi * row.iter().zip(&z).map(|(a, b)| a * b).sum::<f64>())
            .sum()
    }
}

impl Learner {
    pub fn new(config: Config) -> Result<Self, ConfigError> {
        config.check()?;
        let p = config.inputs.len();
        Ok(Self {
            config,
            n: 0,
            mean: vec![0.0; p + 1],
            comoment: vec![0.0; (p + 1) * (p + 1)],
            min: vec![0.0; p],
            max: vec![0.0; p],
            extremes: Vec::new(),
        })
    }

    pub fn config(&self) -> &Config {
        &self.config
    }

    /// Learning samples taken.
    pub fn samples(&self) -> u64 {
        self.n
    }

    fn dim(&self) -> usize {
        self.config.inputs.len()
    }

    fn co(&self, i: usize, j: usize) -> f64 {
        self.comoment[i * (self.dim() + 1) + j]
    }

    /// Adds one learning sample: the inputs in the configured order and the approach.
    /// A refused sample leaves the state as it was.
    pub fn learn(&mut self, x: &[f64], approach: f64) -> Result<(), SampleError> {
        check_sample(&self.config.inputs, x, approach)?;
        let n = self.n as f64 + 1.0;
        let d: Vec<f64> = x
            .iter()
            .chain(std::iter::once(&approach))
            .zip(&self.mean)
            .map(|(v, m)| v - m)
            .collect();
        let w = (n - 1.0) / n;
        let p = self.dim();
        if let Some(k) = (0..=p).find(|&k| !(self.co(k, k) + w * d[k] * d[k]).is_finite()) {
            let name = self.config.inputs.get(k).map_or("approach", |i| &i.name);
            return Err(SampleError::OutOfScale(name.to_owned()));
        }
        self.n += 1;
        for (m, dk) in self.mean.iter_mut().zip(&d) {
            *m += dk / n;
        }
        for (row, di) in self.comoment.chunks_mut(p + 1).zip(&d) {
            for (c, dj) in row.iter_mut().zip(&d) {
                *c += w * di * dj;
            }
        }
        let first = self.n == 1;
        for ((lo, hi), v) in self.min.iter_mut().zip(self.max.iter_mut()).zip(x) {
            if first || *v < *lo {
                *lo = *v;
            }
            if first || *v > *hi {
                *hi = *v;
            }
        }
        self.keep_extreme(x);
        Ok(())
    }

    /// Adds `x` to the extreme points and drops the least outlying one beyond the bound.
    fn keep_extreme(&mut self, x: &[f64]) {
        self.extremes.push(x.to_vec());
        if self.extremes.len() <= EXTREME_POINTS {
            return;
        }
        let metric = self.running_metric();
        let least = self
            .extremes
            .iter()
            .map(|e| metric.radius2(e))
            .enumerate()
            .min_by(|a, b| a.1.total_cmp(&b.1))
            .map(|(k, _)| k);
        if let Some(k) = least {
            self.extremes.swap_remove(k);
        }
    }

    /// √C_jj of each input (0 without spread) and the scaled correlation matrix.
    fn correlation(&self) -> (Vec<f64>, DMatrix<f64>) {
        let p = self.dim();
        let scale: Vec<f64> = (0..p)
            .map(|j| {
                let c = self.co(j, j);
                if c > 0.0 { c.sqrt() } else { 0.0 }
            })
            .collect();
        let r = DMatrix::from_fn(p, p, |i, j| {
            if scale[i] > 0.0 && scale[j] > 0.0 {
                self.co(i, j) / (scale[i] * scale[j])
            } else if i == j {
                1.0
            } else {
                0.0
            }
        });
        (scale, r)
    }

    /// The distance of the running statistics (for choosing extreme points); falls back
    /// to scaled Euclidean distance while the correlation matrix is singular.
    fn running_metric(&self) -> Metric {
        let p = self.dim();
        let (scale, r) = self.correlation();
        let rinv = r
            .cholesky()
            .map(|c| c.inverse())
            .filter(|m| m.iter().all(|v| v.is_finite()))
            .unwrap_or_else(|| DMatrix::identity(p, p));
        Metric {
            mean: self.mean[..p].to_vec(),
            scale,
            rinv: row_major(&rinv),
        }
    }

    /// Fits the regression over the samples so far (the learner is left as it is).
    pub fn freeze(&self) -> Result<Model, FitError> {
        let need = self.config.min_samples;
        if self.n < need {
            return Err(FitError::TooFewSamples { have: self.n, need });
        }
        let p = self.dim();
        let (scale, r) = self.correlation();
        let spread = |j: usize| scale[j] > 1e-10 * self.mean[j].abs() * (self.n as f64).sqrt();
        if let Some(j) = (0..p).find(|&j| scale[j] <= 0.0 || !spread(j)) {
            return Err(FitError::NoSpread {
                input: self.config.inputs[j].name.clone(),
                mean: self.mean[j],
            });
        }
        let condition = self.collinearity(&r)?;
        let Some(chol) = r.cholesky() else {
            return Err(self.collinear(vec![1.0; p], f64::INFINITY));
        };
        let rinv = chol.inverse();
        let ry = DVector::from_fn(p, |j, _| self.co(j, p) / scale[j]);
        let bstar = chol.solve(&ry);
        let slopes: Vec<f64> = bstar.iter().zip(&scale).map(|(b, s)| b / s).collect();
        let metric = Metric {
            mean: self.mean[..p].to_vec(),
            scale,
            rinv: row_major(&rinv),
        };
        let sse = (self.co(p, p) - bstar.dot(&ry)).max(0.0);
        let fit = self.statistics(&metric, &slopes, sse, condition);
        Ok(Model::new(self.clone(), fit, metric, slopes))
    }

    /// κ of the correlation matrix, or the refusal naming the collinear inputs.
    fn collinearity(&self, r: &DMatrix<f64>) -> Result<f64, FitError> {
        let p = self.dim();
        let eig = r.clone().symmetric_eigen();
        let values: Vec<f64> = eig.eigenvalues.iter().copied().collect();
        let (mut kmin, mut kmax) = (0, 0);
        for (k, v) in values.iter().enumerate() {
            if *v < values[kmin] {
                kmin = k;
            }
            if *v > values[kmax] {
                kmax = k;
            }
        }
        let condition = if values[kmin] > 0.0 {
            values[kmax] / values[kmin]
        } else {
            f64::INFINITY
        };
        if condition <= self.config.condition_limit {
            return Ok(condition);
        }
        // Variance-decomposition proportions (Belsley, Kuh & Welsch 1980) on the smallest
        // eigenvalue; eigenvalues at round-off level are floored to keep them finite.
        let floor = values[kmax].abs().max(1.0) * f64::EPSILON;
        let phi = |j: usize, k: usize| eig.eigenvectors[(j, k)].powi(2) / values[k].max(floor);
        let proportions: Vec<f64> = (0..p)
            .map(|j| phi(j, kmin) / (0..p).map(|k| phi(j, k)).sum::<f64>())
            .collect();
        Err(self.collinear(proportions, condition))
    }

    /// The collinearity refusal: inputs with a proportion above 0.5, at least the two
    /// largest.
    fn collinear(&self, proportions: Vec<f64>, condition: f64) -> FitError {
        let mut order: Vec<usize> = (0..proportions.len()).collect();
        order.sort_by(|a, b| proportions[*b].total_cmp(&proportions[*a]));
        let mut named: Vec<usize> = order
            .iter()
            .enumerate()
            .filter(|(rank, j)| *rank < 2 || proportions[**j] > 0.5)
            .map(|(_, j)| *j)
            .collect();
        named.sort_unstable();
        FitError::Collinear {
            inputs: named
                .iter()
                .map(|j| self.config.inputs[*j].name.clone())
                .collect(),
            condition,
            limit: self.config.condition_limit,
        }
    }

    /// The fit statistics from the solved normal equations.
    fn statistics(&self, metric: &Metric, slopes: &[f64], sse: f64, condition: f64) -> Fit {
        let p = self.dim();
        let n = self.n as f64;
        let dof = self.n - p as u64 - 1;
        let s = (sse / dof as f64).sqrt();
        let syy = self.co(p, p);
        let r2 = (syy > 0.0).then(|| 1.0 - sse / syy);
        let adjusted = r2.map(|r2| 1.0 - (1.0 - r2) * (n - 1.0) / dof as f64);
        let mean_y = self.mean[p];
        let coefficients = (0..p)
            .map(|j| Coefficient {
                name: self.config.inputs[j].name.clone(),
                value: slopes[j],
                std_error: s * metric.rinv[j * p + j].sqrt() / metric.scale[j],
            })
            .collect();
        let origin = vec![0.0; p];
        let b0 = mean_y
            - slopes
                .iter()
                .zip(&metric.mean)
                .map(|(b, m)| b * m)
                .sum::<f64>();
        let intercept = Coefficient {
            name: "intercept".to_owned(),
            value: b0,
            std_error: s * (1.0 / n + metric.radius2(&origin)).sqrt(),
        };
        let ranges = (0..p)
            .map(|j| InputRange {
                name: self.config.inputs[j].name.clone(),
                unit: self.config.inputs[j].unit.clone(),
                min: self.min[j],
                max: self.max[j],
                mean: self.mean[j],
            })
            .collect();
        let far = self
            .extremes
            .iter()
            .map(|e| metric.radius2(e))
            .fold(0.0, f64::max);
        Fit {
            n: self.n,
            p,
            dof,
            intercept,
            coefficients,
            r_squared: r2,
            adjusted_r_squared: adjusted,
            residual_sd: s,
            condition_number: condition,
            ranges,
            max_leverage: 1.0 / n + far,
            reference_approach: mean_y,
        }
    }
}

/// A frozen regression: gives residuals and the normalised approach.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(try_from = "Learner", into = "Learner")]
pub struct Model {
    learner: Learner,
    fit: Fit,
    metric: Metric,
    slopes: Vec<f64>,
    /// t_{n−p−1} at 95 %, two-sided.
    t: f64,
    /// Largest accepted zᵀR⁻¹z: (1 + margin)² (h_max − 1/n).
    radius2_limit: f64,
}

impl From<Model> for Learner {
    fn from(m: Model) -> Self {
        m.learner
    }
}

impl TryFrom<Learner> for Model {
    type Error = FitError;

    fn try_from(l: Learner) -> Result<Self, FitError> {
        l.freeze()
    }
}

impl Model {
    fn new(learner: Learner, fit: Fit, metric: Metric, slopes: Vec<f64>) -> Self {
        let t = t95(usize::try_from(fit.dof).unwrap_or(usize::MAX));
        let grow = 1.0 + learner.config.margin;
        let radius2_limit = grow * grow * (fit.max_leverage - 1.0 / fit.n as f64);
        Self {
            learner,
            fit,
            metric,
            slopes,
            t,
            radius2_limit,
        }
    }

    pub fn fit(&self) -> &Fit {
        &self.fit
    }

    pub fn config(&self) -> &Config {
        &self.learner.config
    }

    /// The residual and normalised approach of a sample (inputs in the configured order),
    /// or why there is none.
    pub fn residual(&self, x: &[f64], approach: f64) -> Result<Normalised, Refusal> {
        check_sample(&self.learner.config.inputs, x, approach)?;
        self.check_range(x)?;
        let radius2 = self.metric.radius2(x);
        let leverage = 1.0 / self.fit.n as f64 + radius2;
        if radius2.is_nan() || radius2 > self.radius2_limit {
            return Err(self.hidden(x, leverage));
        }
        let reference = self.fit.reference_approach;
        let predicted = reference
            + self
                .slopes
                .iter()
                .zip(x.iter().zip(&self.metric.mean))
                .map(|(b, (v, m))| b * (v - m))
                .sum::<f64>();
        let residual = approach - predicted;
        Ok(Normalised {
            predicted,
            residual,
            half_width_95: self.t * self.fit.residual_sd * (1.0 + leverage).sqrt(),
            leverage,
            normalised: residual + reference,
        })
    }

    /// The per-input range check with the margin.
    fn check_range(&self, x: &[f64]) -> Result<(), Refusal> {
        for (range, value) in self.fit.ranges.iter().zip(x) {
            let pad = self.learner.config.margin * (range.max - range.min);
            let (low, high) = (range.min - pad, range.max + pad);
            if *value < low || *value > high {
                return Err(Refusal::OutsideRange {
                    input: range.name.clone(),
                    unit: range.unit.clone(),
                    value: *value,
                    min: range.min,
                    max: range.max,
                    low,
                    high,
                });
            }
        }
        Ok(())
    }

    fn hidden(&self, x: &[f64], leverage: f64) -> Refusal {
        let conditions: Vec<String> = self
            .fit
            .ranges
            .iter()
            .zip(x)
            .map(|(r, v)| format!("`{}` = {} {}", r.name, v, r.unit))
            .collect();
        Refusal::HiddenExtrapolation {
            leverage,
            limit: 1.0 / self.fit.n as f64 + self.radius2_limit,
            max_leverage: self.fit.max_leverage,
            conditions: conditions.join(", "),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn config(names: &[&str]) -> Config {
        Config::new(names.iter().map(|n| Input::new(n, "u")).collect())
    }

    fn learned(cfg: Config, rows: &[(Vec<f64>, f64)]) -> Learner {
        let mut l = Learner::new(cfg).unwrap();
        for (x, y) in rows {
            l.learn(x, *y).unwrap();
        }
        l
    }

    fn rel(a: f64, b: f64) -> f64 {
        (a - b).abs() / b.abs().max(f64::MIN_POSITIVE)
    }

    /// Invented pseudo-random numbers in [−1, 1) (a multiplicative congruential sequence,
    /// for self-consistency tests only).
    fn invented(k: usize, salt: usize) -> f64 {
        let v = (k as u64 + 1)
            .wrapping_mul(6_364_136_223_846_793_005)
            .wrapping_add(salt as u64 * 1_442_695_040_888_963_407);
        ((v >> 11) as f64 / (1u64 << 53) as f64) * 2.0 - 1.0
    }

    // NIST Statistical Reference Datasets, linear regression, "Norris" (36 observations,
    // y = B0 + B1 x), https://www.itl.nist.gov/div898/strd/lls/data/Norris.shtml; data and
    // certified values as transcribed in SciPy's test suite (scipy/stats/tests/
    // test_stats.py, test_nist_norris) and GSL's fit tests, which agree.
    const NORRIS_X: [f64; 36] = [
        0.2, 337.4, 118.2, 884.6, 10.1, 226.5, 666.3, 996.3, 448.6, 777.0, 558.2, 0.4, 0.6, 775.5,
        666.9, 338.0, 447.5, 11.6, 556.0, 228.1, 995.8, 887.6, 120.2, 0.3, 0.3, 556.8, 339.1,
        887.2, 999.0, 779.0, 11.1, 118.3, 229.2, 669.1, 448.9, 0.5,
    ];
    const NORRIS_Y: [f64; 36] = [
        0.1, 338.8, 118.1, 888.0, 9.2, 228.1, 668.5, 998.5, 449.1, 778.9, 559.2, 0.3, 0.1, 778.1,
        668.8, 339.3, 448.9, 10.8, 557.7, 228.3, 998.0, 888.8, 119.6, 0.3, 0.6, 557.6, 339.3,
        888.0, 998.5, 778.9, 10.2, 117.6, 228.9, 668.4, 449.2, 0.2,
    ];

    #[test]
    fn norris_certified_values() {
        let rows: Vec<(Vec<f64>, f64)> = NORRIS_X
            .iter()
            .zip(NORRIS_Y)
            .map(|(x, y)| (vec![*x], y))
            .collect();
        let m = learned(config(&["x"]), &rows).freeze().unwrap();
        let f = m.fit();
        // NIST StRD Norris certified values (15 digits); we ask for 1e-9 relative.
        let certified = [
            (f.intercept.value, -0.262323073774029),
            (f.intercept.std_error, 0.232818234301152),
            (f.coefficients[0].value, 1.00211681802045),
            (f.coefficients[0].std_error, 0.429796848199937e-3),
            (f.residual_sd, 0.884796396144373),
            (f.r_squared.unwrap(), 0.999993745883712),
        ];
        for (got, want) in certified {
            assert!(rel(got, want) < 1e-9, "{got} vs {want}");
        }
        // Adjusted R² = 1 − (1 − R²)(n − 1)/(n − 2) from the certified R² [derived].
        let adj = 1.0 - (1.0 - 0.999993745883712) * 35.0 / 34.0;
        assert!(rel(f.adjusted_r_squared.unwrap(), adj) < 1e-9);
        assert_eq!((f.n, f.p, f.dof), (36, 1, 34));
        assert!((f.condition_number - 1.0).abs() < 1e-12);
        assert_eq!((f.ranges[0].min, f.ranges[0].max), (0.2, 999.0));
        // The one-input prediction interval, ŷ ± t s √(1 + 1/n + (x − x̄)²/Sxx)
        // (Montgomery, Peck & Vining §2.4, as in monitor::drift), by two passes here.
        let xbar = NORRIS_X.iter().sum::<f64>() / 36.0;
        let sxx: f64 = NORRIS_X.iter().map(|x| (x - xbar).powi(2)).sum();
        let n0 = m.residual(&[500.0], 501.0).unwrap();
        let h0 = 1.0 / 36.0 + (500.0 - xbar).powi(2) / sxx;
        assert!(rel(n0.leverage, h0) < 1e-12);
        let half = t95(34) * 0.884796396144373 * (1.0 + h0).sqrt();
        assert!(rel(n0.half_width_95, half) < 1e-9);
        let predicted = -0.262323073774029 + 1.00211681802045 * 500.0;
        assert!((n0.predicted - predicted).abs() < 1e-9);
        assert!((n0.residual - (501.0 - predicted)).abs() < 1e-9);
        // Largest learning leverage: x = 999.0 is the farthest from x̄ [derived].
        let hmax = 1.0 / 36.0 + (999.0 - xbar).powi(2) / sxx;
        assert!(rel(f.max_leverage, hmax) < 1e-12);
    }

    /// Hand-derived (invented data): x = −5 … 5, y = 10 + 2x + e with e = +1 at x = ±5,
    /// −1 at x = ±4, 0 elsewhere. Σe = 0 and Σxe = 0, so b0 = 10 and b1 = 2 exactly;
    /// x̄ = 0, ȳ = 10, Sxx = 2(1+4+9+16+25) = 110, SSE = 4, s = √(4/9) = 2/3,
    /// Syy = 4·110 + 4 = 444, R² = 440/444 = 110/111, adjusted R² = 1 − (4/444)(10/9) =
    /// 989/999, SE(b1) = s/√110, SE(b0) = s/√11, h_max = 1/11 + 25/110 = 7/22.
    fn hand_model() -> Model {
        let e = |x: i32| match x.abs() {
            5 => 1.0,
            4 => -1.0,
            _ => 0.0,
        };
        let rows: Vec<(Vec<f64>, f64)> = (-5..=5)
            .map(|x| (vec![f64::from(x)], 10.0 + 2.0 * f64::from(x) + e(x)))
            .collect();
        let cfg = Config {
            min_samples: 11,
            ..config(&["throughput_kmol_h"])
        };
        learned(cfg, &rows).freeze().unwrap()
    }

    #[test]
    fn hand_derived_simple_regression() {
        let m = hand_model();
        let f = m.fit();
        let s = 2.0 / 3.0;
        let checks = [
            (f.intercept.value, 10.0),
            (f.coefficients[0].value, 2.0),
            (f.residual_sd, s),
            (f.r_squared.unwrap(), 110.0 / 111.0),
            (f.adjusted_r_squared.unwrap(), 989.0 / 999.0),
            (f.coefficients[0].std_error, s / 110f64.sqrt()),
            (f.intercept.std_error, s / 11f64.sqrt()),
            (f.max_leverage, 7.0 / 22.0),
            (f.reference_approach, 10.0),
        ];
        for (got, want) in checks {
            assert!((got - want).abs() < 1e-12, "{got} vs {want}");
        }
        // At x = 0 with a measured 12: ŷ = 10, residual 2, normalised 2 + ȳ = 12,
        // h0 = 1/11, half width t(9)·s·√(1 + 1/11), t(9) = 2.262 (NIST/SEMATECH
        // e-Handbook table 1.3.6.7.2, the table monitor::drift uses).
        let r = m.residual(&[0.0], 12.0).unwrap();
        assert!((r.predicted - 10.0).abs() < 1e-12);
        assert!((r.residual - 2.0).abs() < 1e-12);
        assert!((r.normalised - 12.0).abs() < 1e-12);
        assert!((r.leverage - 1.0 / 11.0).abs() < 1e-12);
        assert!((r.half_width_95 - 2.262 * s * (12f64 / 11.0).sqrt()).abs() < 1e-12);
        // Leverage limit with the 10 % margin: (x − 0)²/110 ≤ 1.21 · 25/110, |x| ≤ 5.5.
        assert!(m.residual(&[5.4], 20.0).is_ok());
        assert!(matches!(
            m.residual(&[5.9], 20.0),
            Err(Refusal::HiddenExtrapolation { .. })
        ));
        // The box with the margin is [−6, 6].
        for x in [6.5, -6.5] {
            match m.residual(&[x], 20.0) {
                Err(Refusal::OutsideRange {
                    input,
                    value,
                    low,
                    high,
                    ..
                }) => {
                    assert_eq!(input, "throughput_kmol_h");
                    assert_eq!(value, x);
                    assert!((low + 6.0).abs() < 1e-12 && (high - 6.0).abs() < 1e-12);
                }
                other => panic!("{other:?}"),
            }
        }
    }

    #[test]
    fn exact_plane_in_two_inputs() {
        // Invented: y = 2 + 3 x1 − 0.5 x2 exactly on a 7 × 6 grid.
        let rows: Vec<(Vec<f64>, f64)> = (0..42)
            .map(|k| {
                let (x1, x2) = ((k % 7) as f64, (k / 7) as f64);
                (vec![x1, x2], 2.0 + 3.0 * x1 - 0.5 * x2)
            })
            .collect();
        let m = learned(config(&["a", "b"]), &rows).freeze().unwrap();
        let f = m.fit();
        assert!((f.intercept.value - 2.0).abs() < 1e-10);
        assert!((f.coefficients[0].value - 3.0).abs() < 1e-10);
        assert!((f.coefficients[1].value + 0.5).abs() < 1e-10);
        assert!((f.r_squared.unwrap() - 1.0).abs() < 1e-12);
        // SSE = C_yy − b*ᵀr cancels, so from the co-moments s is only good to about
        // √(ε·C_yy/dof) = √(2.2e-16 · 1541 / 39) ≈ 1e-7 [derived; 1.3e-7 is found].
        assert!(f.residual_sd < 1e-6, "{}", f.residual_sd);
        // A full grid is orthogonal: the correlation matrix is I, κ = 1.
        assert!((f.condition_number - 1.0).abs() < 1e-12);
        let r = m.residual(&[3.0, 2.5], 2.0 + 9.0 - 1.25 + 0.7).unwrap();
        assert!((r.residual - 0.7).abs() < 1e-10);
    }

    /// Invented: pressure 30 bar ± 0.01 and temperature 500 K ± 0.5 with a 0.1 mK-level
    /// noise, against the same conditions shifted to about zero mean.
    #[test]
    fn large_offsets_give_the_shifted_fit() {
        let mut offset = Vec::new();
        let mut shifted = Vec::new();
        for k in 0..200 {
            let (u1, u2) = (invented(k, 1), invented(k, 2));
            let y = 5.0 + 40.0 * 0.01 * u1 + 0.1 * 0.5 * u2 + 1e-4 * invented(k, 3);
            offset.push((vec![30.0 + 0.01 * u1, 500.0 + 0.5 * u2], y));
            shifted.push((vec![0.01 * u1, 0.5 * u2], y));
        }
        let names = ["pressure_bar_abs", "inlet_temperature_k"];
        let a = learned(config(&names), &offset).freeze().unwrap();
        let b = learned(config(&names), &shifted).freeze().unwrap();
        let (fa, fb) = (a.fit(), b.fit());
        for (ca, cb) in fa.coefficients.iter().zip(&fb.coefficients) {
            // 1e-9 relative: the offset inputs themselves carry 30·2⁻⁵³ of rounding on a
            // 0.01 spread (3e-13 relative), so this is far above what we lose.
            assert!(rel(ca.value, cb.value) < 1e-9, "{ca:?} {cb:?}");
            assert!(rel(ca.std_error, cb.std_error) < 1e-9);
        }
        assert!((fa.coefficients[0].value - 40.0).abs() < 0.1);
        assert!(rel(fa.residual_sd, fb.residual_sd) < 1e-6);
        assert!((fa.r_squared.unwrap() - fb.r_squared.unwrap()).abs() < 1e-12);
        let (xa, xb) = (&offset[7].0, &shifted[7].0);
        let (ra, rb) = (a.residual(xa, 5.2).unwrap(), b.residual(xb, 5.2).unwrap());
        assert!((ra.residual - rb.residual).abs() < 1e-9);
        assert!((ra.leverage - rb.leverage).abs() < 1e-9);
    }

    /// Invented: x = 1e8 + u (u in [−1, 1)), y = 3 + 2u exactly. Naive uncentred sums
    /// (Σx², Σxy) cancel to nothing (the naive slope comes out −0.13 here); the centred
    /// accumulation keeps the slope to the rounding of x itself (2⁻²⁶ ≈ 1.5e-8 absolute).
    #[test]
    fn centred_accumulation_beats_naive_sums() {
        let rows: Vec<(Vec<f64>, f64)> = (0..200)
            .map(|k| {
                let u = invented(k, 4);
                (vec![1e8 + u], 3.0 + 2.0 * u)
            })
            .collect();
        let m = learned(config(&["x"]), &rows).freeze().unwrap();
        let ours = m.fit().coefficients[0].value;
        let n = rows.len() as f64;
        let (mut sx, mut sy, mut sxx, mut sxy) = (0.0, 0.0, 0.0, 0.0);
        for (x, y) in &rows {
            sx += x[0];
            sy += y;
            sxx += x[0] * x[0];
            sxy += x[0] * y;
        }
        let naive = (sxy - sx * sy / n) / (sxx - sx * sx / n);
        assert!(rel(ours, 2.0) < 1e-6, "{ours}");
        assert!(naive.is_nan() || rel(naive, 2.0) > 1e-2, "{naive}");
    }

    /// Invented correlated inputs: x2 follows x1. The corner (max x1, min x2) is inside
    /// both ranges but far from the learned cloud.
    #[test]
    fn hidden_extrapolation_is_refused() {
        let rows: Vec<(Vec<f64>, f64)> = (0..100)
            .map(|k| {
                let (u, v) = (invented(k, 5), invented(k, 6));
                (vec![u, u + 0.2 * v], 1.0 + u - v)
            })
            .collect();
        let m = learned(config(&["throughput", "steam"]), &rows)
            .freeze()
            .unwrap();
        let f = m.fit();
        let corner = [f.ranges[0].max, f.ranges[1].min];
        match m.residual(&corner, 1.0) {
            Err(Refusal::HiddenExtrapolation {
                leverage,
                max_leverage,
                conditions,
                ..
            }) => {
                assert!(leverage > max_leverage);
                assert!(conditions.contains("`throughput`") && conditions.contains("`steam`"));
            }
            other => panic!("{other:?}"),
        }
        let centre = [f.ranges[0].mean, f.ranges[1].mean];
        let r = m.residual(&centre, 1.5).unwrap();
        assert!((r.leverage - 0.01).abs() < 1e-12);
    }

    /// Invented stationary design, 500 samples: the kept extreme points give the exact
    /// largest learning leverage (found here by a second pass), in bounded memory.
    #[test]
    fn max_leverage_from_bounded_points() {
        let rows: Vec<(Vec<f64>, f64)> = (0..500)
            .map(|k| {
                let (a, b, c) = (invented(k, 7), invented(k, 8), invented(k, 9));
                (vec![a, a + b, 100.0 + 3.0 * c - a], a + b + c)
            })
            .collect();
        let l = learned(config(&["a", "b", "c"]), &rows);
        assert_eq!(l.extremes.len(), EXTREME_POINTS);
        let m = l.freeze().unwrap();
        let exact = rows
            .iter()
            .map(|(x, _)| 1.0 / 500.0 + m.metric.radius2(x))
            .fold(0.0, f64::max);
        assert!(rel(m.fit().max_leverage, exact) < 1e-12);
        assert!(rows.iter().all(|(x, y)| m.residual(x, *y).is_ok()));
    }

    #[test]
    fn collinear_inputs_are_named() {
        // Invented: x2 = 2 x1 + 1e-7 noise, x3 independent.
        let rows: Vec<(Vec<f64>, f64)> = (0..60)
            .map(|k| {
                let (u, v, w) = (invented(k, 10), invented(k, 11), invented(k, 12));
                (vec![u, 2.0 * u + 1e-7 * v, w], u + w)
            })
            .collect();
        let err = learned(config(&["flow", "steam", "pressure"]), &rows)
            .freeze()
            .unwrap_err();
        match &err {
            FitError::Collinear {
                inputs, condition, ..
            } => {
                assert_eq!(inputs, &["flow".to_owned(), "steam".to_owned()]);
                assert!(*condition > 1e3);
            }
            other => panic!("{other:?}"),
        }
        let text = err.to_string();
        assert!(text.contains("flow") && text.contains("steam") && !text.contains("pressure"));
    }

    #[test]
    fn too_few_samples_and_no_spread() {
        let rows: Vec<(Vec<f64>, f64)> = (0..12).map(|k| (vec![k as f64, 1.0], k as f64)).collect();
        let l = learned(config(&["flow", "pressure"]), &rows);
        let err = l.freeze().unwrap_err();
        assert_eq!(err, FitError::TooFewSamples { have: 12, need: 30 });
        assert_eq!(err.to_string(), "too few samples to fit: 12 of 30");
        let rows: Vec<(Vec<f64>, f64)> =
            (0..30).map(|k| (vec![k as f64, 31.5], k as f64)).collect();
        match learned(config(&["flow", "pressure"]), &rows).freeze() {
            Err(FitError::NoSpread { input, mean }) => {
                assert_eq!((input.as_str(), mean), ("pressure", 31.5));
            }
            other => panic!("{other:?}"),
        }
    }

    #[test]
    fn bad_samples_name_the_input_and_change_nothing() {
        let mut l = Learner::new(config(&["flow", "steam"])).unwrap();
        l.learn(&[1.0, 2.0], 3.0).unwrap();
        let before = l.clone();
        assert_eq!(
            l.learn(&[1.0], 3.0),
            Err(SampleError::Count {
                expected: 2,
                got: 1
            })
        );
        let err = l.learn(&[1.0, f64::NAN], 3.0).unwrap_err();
        assert!(matches!(&err, SampleError::NonFinite { input, .. } if input == "steam"));
        assert!(err.to_string().contains("`steam`"));
        assert!(matches!(
            l.learn(&[1.0, 2.0], f64::INFINITY),
            Err(SampleError::NonFiniteApproach(_))
        ));
        let err = l.learn(&[1e200, 2.0], 3.0).unwrap_err();
        assert_eq!(err, SampleError::OutOfScale("flow".to_owned()));
        assert_eq!(l, before);
        let m = hand_model();
        let err = m.residual(&[f64::NAN], 1.0).unwrap_err();
        assert!(err.to_string().contains("throughput_kmol_h"), "{err}");
    }

    #[test]
    fn refusal_text_names_the_input_and_range() {
        let err = hand_model().residual(&[7.25], 20.0).unwrap_err();
        assert_eq!(
            err.to_string(),
            "context input `throughput_kmol_h` = 7.25 u is outside the learned range -5 to 5 u \
             (accepted from -6 to 6 with the margin)"
        );
    }

    #[test]
    fn configuration_is_checked() {
        let bad = |c: Config| Learner::new(c).unwrap_err();
        assert_eq!(bad(config(&[])), ConfigError::InputCount(0));
        assert_eq!(
            bad(config(&["a", "b", "c", "d", "e"])),
            ConfigError::InputCount(5)
        );
        assert_eq!(
            bad(config(&["a", "a"])),
            ConfigError::DuplicateName("a".into())
        );
        assert_eq!(bad(config(&["a", " "])), ConfigError::EmptyName(1));
        let few = Config {
            min_samples: 12,
            ..config(&["a", "b", "c"])
        };
        assert_eq!(bad(few), ConfigError::MinSamples { got: 12, least: 13 });
        let margin = Config {
            margin: -0.1,
            ..config(&["a"])
        };
        assert_eq!(bad(margin), ConfigError::Margin(-0.1));
        let limit = Config {
            condition_limit: 0.5,
            ..config(&["a"])
        };
        assert_eq!(bad(limit), ConfigError::ConditionLimit(0.5));
        assert_eq!(config(&["a"]).min_samples, 30);
    }

    #[test]
    fn named_values_are_arranged() {
        let c = config(&["flow", "steam"]);
        assert_eq!(
            c.arrange(&[("steam", 2.0), ("flow", 1.0)]),
            Ok(vec![1.0, 2.0])
        );
        assert_eq!(
            c.arrange(&[("flow", 1.0), ("pressure", 2.0)]),
            Err(SampleError::Unknown("pressure".into()))
        );
        assert_eq!(
            c.arrange(&[("flow", 1.0), ("flow", 2.0)]),
            Err(SampleError::Missing("steam".into()))
        );
        assert_eq!(
            c.arrange(&[("flow", 1.0)]),
            Err(SampleError::Count {
                expected: 2,
                got: 1
            })
        );
    }

    #[test]
    fn saved_state_is_checked() {
        let m = hand_model();
        let mut v = toml::Value::try_from(&m).unwrap();
        let back: Model = v.clone().try_into().unwrap();
        assert_eq!(back, m);
        if let Some(mean) = v.get_mut("mean").and_then(|x| x.as_array_mut()) {
            mean.pop();
        }
        assert!(v.try_into::<Learner>().is_err());
        // Too few samples for the saved configuration: a model does not load.
        let mut l = Learner::new(config(&["a"])).unwrap();
        l.learn(&[1.0], 2.0).unwrap();
        let v = toml::Value::try_from(&l).unwrap();
        assert_eq!(v.clone().try_into::<Learner>().unwrap(), l);
        assert!(v.try_into::<Model>().is_err());
    }

    /// One random case: a linear truth over p inputs with uniform noise.
    struct Case {
        rows: Vec<(Vec<f64>, f64)>,
        noise: Vec<f64>,
        truth: Vec<f64>,
    }

    fn case(p: usize, truth: &[f64], u: &[Vec<f64>], e: &[f64], place: &[(f64, f64)]) -> Case {
        let rows = u
            .iter()
            .zip(e)
            .map(|(ui, ei)| {
                let x: Vec<f64> = ui
                    .iter()
                    .zip(place)
                    .take(p)
                    .map(|(v, (o, s))| o + s * v)
                    .collect();
                let y = truth[0] + x.iter().zip(&truth[1..]).map(|(a, b)| a * b).sum::<f64>();
                (x, y + ei)
            })
            .collect();
        Case {
            rows,
            noise: e.to_vec(),
            truth: truth[..=p].to_vec(),
        }
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(64))]

        /// Invented random truths: coefficients within 6 standard errors, learning
        /// samples accepted with residual ≈ noise, samples outside the box refused by
        /// name, and the state round-trips through serde (toml::Value).
        #[test]
        fn random_linear_truths(
            p in 1usize..=4,
            truth in proptest::collection::vec(-5.0f64..5.0, 5),
            u in proptest::collection::vec(proptest::collection::vec(-1.0f64..1.0, 4), 60),
            e in proptest::collection::vec(-0.05f64..0.05, 60),
            place in proptest::collection::vec((-100.0f64..1000.0, 0.01f64..100.0), 4),
            side in 0usize..4,
        ) {
            let c = case(p, &truth, &u, &e, &place);
            let names = ["throughput_kmol_h", "steam_to_dry_gas", "inlet_temperature_k",
                "pressure_bar_abs"];
            let l = learned(config(&names[..p]), &c.rows);
            let m = match l.freeze() {
                Ok(m) => m,
                Err(FitError::Collinear { .. }) => return Err(TestCaseError::reject("collinear")),
                Err(other) => return Err(TestCaseError::fail(other.to_string())),
            };
            let f = m.fit();
            prop_assert!((f.intercept.value - c.truth[0]).abs() <= 6.0 * f.intercept.std_error);
            for (b, t) in f.coefficients.iter().zip(&c.truth[1..]) {
                prop_assert!((b.value - t).abs() <= 6.0 * b.std_error, "{b:?} vs {t}");
            }
            for ((x, y), ei) in c.rows.iter().zip(&c.noise) {
                let r = m.residual(x, *y).map_err(|e| TestCaseError::fail(e.to_string()))?;
                let tol = 6.0 * f.residual_sd * r.leverage.sqrt() + 1e-9 * (1.0 + y.abs());
                prop_assert!((r.residual - ei).abs() <= tol, "{r:?} {ei}");
            }
            let j = side % p;
            let mut x: Vec<f64> = f.ranges.iter().map(|r| r.mean).collect();
            let span = f.ranges[j].max - f.ranges[j].min;
            x[j] = f.ranges[j].max + 0.15 * span;
            let refused = matches!(m.residual(&x, 0.0),
                Err(Refusal::OutsideRange { ref input, .. }) if input == names[j]);
            prop_assert!(refused);
            x[j] = f.ranges[j].min - 0.15 * span;
            prop_assert!(m.residual(&x, 0.0).is_err());
            let v = toml::Value::try_from(&l).map_err(|e| TestCaseError::fail(e.to_string()))?;
            let back: Learner = v.try_into().map_err(|e| TestCaseError::fail(e.to_string()))?;
            prop_assert_eq!(&back, &l);
            let v = toml::Value::try_from(&m).map_err(|e| TestCaseError::fail(e.to_string()))?;
            let back: Model = v.try_into().map_err(|e| TestCaseError::fail(e.to_string()))?;
            prop_assert_eq!(&back, &m);
        }
    }
}
