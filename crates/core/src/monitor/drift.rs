//! Drift statistics of the approach: EWMA with its control limits, a two-sided tabular
//! CUSUM that finds level shifts (steps) and restarts after each, and a linear end-of-run
//! forecast with a prediction interval.
//! Pure: samples and times are passed in. (The alert and alarm layers that use these
//! figures live in `watch.rs`.)
//!
//! # References
//! - S. W. Roberts, "Control chart tests based on geometric moving averages",
//!   Technometrics 1 (1959) 239: z_i = λx_i + (1−λ)z_{i−1}, limits
//!   μ0 ± Lσ √(λ/(2−λ) (1 − (1−λ)^{2i})).
//! - E. S. Page, "Continuous inspection schemes", Biometrika 41 (1954) 100:
//!   S_i = max(0, S_{i−1} + x_i − μ0 − k), signal when S_i > h; the change point is
//!   estimated as the first sample since S last was 0 (D. C. Montgomery, Introduction to
//!   Statistical Quality Control, 6th ed., §9.1, "tabular CUSUM"), and the scheme is
//!   restarted after a signal.
//! - Ordinary least squares prediction interval: ŷ ± t_{n−2} s √(1 + 1/n + (x−x̄)²/Sxx),
//!   e.g. D. C. Montgomery, E. A. Peck, Introduction to Linear Regression Analysis, §2.4.
//! - Theil–Sen: H. Theil (1950), P. K. Sen, "Estimates of the regression coefficient based
//!   on Kendall's tau", JASA 63 (1968) 1379: slope = median of pairwise slopes, intercept
//!   = median of y − slope·x; slope interval from the ranks (N ∓ C)/2 of the sorted pairwise
//!   slopes, C = z₀.₉₇₅ √(n(n−1)(2n+5)/18) (as in R. O. Gilbert, Statistical Methods for
//!   Environmental Pollution Monitoring, 1987, §16.5). Its prediction band here uses the
//!   least-squares form with a robust residual scale s = 1.4826·MAD (an approximation,
//!   stated on the result as the method).

use thiserror::Error;

#[derive(Debug, Clone, PartialEq, Error)]
pub enum DriftError {
    #[error("lambda must be in (0, 1], got {0}")]
    Lambda(f64),
    #[error("sigma, L, k and h must be positive finite numbers")]
    Parameter,
}

/// EWMA chart of the approach.
#[derive(Debug, Clone, PartialEq)]
pub struct Ewma {
    lambda: f64,
    mu0: f64,
    sigma: f64,
    l: f64,
    z: f64,
    n: u32,
}

/// One EWMA step's figures.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct EwmaPoint {
    pub z: f64,
    pub upper: f64,
    pub lower: f64,
    pub signal: bool,
}

impl Ewma {
    pub fn new(mu0: f64, sigma: f64, lambda: f64, l: f64) -> Result<Self, DriftError> {
        if !(lambda > 0.0 && lambda <= 1.0) {
            return Err(DriftError::Lambda(lambda));
        }
        if !(sigma > 0.0 && l > 0.0 && sigma.is_finite() && l.is_finite() && mu0.is_finite()) {
            return Err(DriftError::Parameter);
        }
        Ok(Self {
            lambda,
            mu0,
            sigma,
            l,
            z: mu0,
            n: 0,
        })
    }

    /// The statistic and the number of samples taken (to save and restore a run).
    pub fn state(&self) -> (f64, u32) {
        (self.z, self.n)
    }

    /// Restores a saved statistic (non-finite values are ignored).
    pub fn set_state(&mut self, z: f64, n: u32) {
        if z.is_finite() {
            self.z = z;
            self.n = n;
        }
    }

    pub fn push(&mut self, x: f64) -> EwmaPoint {
        self.n += 1;
        self.z = self.lambda * x + (1.0 - self.lambda) * self.z;
        let w = (self.lambda / (2.0 - self.lambda)
            * (1.0 - (1.0 - self.lambda).powi(2 * self.n as i32)))
        .sqrt();
        let upper = self.mu0 + self.l * self.sigma * w;
        let lower = self.mu0 - self.l * self.sigma * w;
        EwmaPoint {
            z: self.z,
            upper,
            lower,
            signal: self.z > upper || self.z < lower,
        }
    }
}

/// One side of the tabular CUSUM: the statistic and the samples since it last was 0.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct CusumSide {
    /// S (K): S⁺ for the upper side, S⁻ for the lower side, both ≥ 0.
    pub s: f64,
    /// Samples since the statistic last was 0, their sum, and the first one's time.
    pub n: u32,
    pub sum: f64,
    pub since_ms: i64,
}

impl CusumSide {
    /// Adds `step` (x − ref − k for the upper side, ref − k − x for the lower one).
    fn push(&mut self, step: f64, x: f64, t: i64) {
        let s = self.s + step;
        if s > 0.0 {
            if self.n == 0 {
                self.since_ms = t;
            }
            self.s = s;
            self.n = self.n.saturating_add(1);
            self.sum += x;
        } else {
            *self = Self::default();
        }
    }
}

/// A level shift the CUSUM found: from the reference level to the mean of the samples
/// since the signalling statistic last was zero (Page's estimate of the change point).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Shift {
    /// Estimated time of the change (the first sample of the run that signalled).
    pub since_ms: i64,
    pub from_k: f64,
    pub to_k: f64,
    /// Samples the estimate `to_k` rests on.
    pub samples: u32,
}

/// What one CUSUM step gives.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CusumPoint {
    pub upper_k: f64,
    pub lower_k: f64,
    pub shift: Option<Shift>,
}

/// Two-sided tabular CUSUM (Page 1954) used as a level-shift detector.
///
/// S⁺ = max(0, S⁺ + x − ref − k), S⁻ = max(0, S⁻ + ref − k − x), both in the unit of x
/// (K). A signal (S > h) reports a [`Shift`] and restarts the scheme, as the standard
/// tabular CUSUM does once a signal is acted on: both statistics go back to 0 and the
/// reference moves to the new level. So S stays bounded under a permanent step (at most h
/// plus one sample's excursion) and a permanent step signals once, not forever.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Cusum {
    reference: f64,
    k: f64,
    h: f64,
    upper: CusumSide,
    lower: CusumSide,
}

/// A CUSUM's saved state.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CusumState {
    pub reference_k: f64,
    pub upper: CusumSide,
    pub lower: CusumSide,
}

impl Cusum {
    pub fn new(reference: f64, k: f64, h: f64) -> Result<Self, DriftError> {
        if !(k >= 0.0 && h > 0.0 && k.is_finite() && h.is_finite() && reference.is_finite()) {
            return Err(DriftError::Parameter);
        }
        Ok(Self {
            reference,
            k,
            h,
            upper: CusumSide::default(),
            lower: CusumSide::default(),
        })
    }

    /// Adds a sample taken at `t_ms`.
    pub fn push(&mut self, x: f64, t_ms: i64) -> CusumPoint {
        self.upper.push(x - self.reference - self.k, x, t_ms);
        self.lower.push(self.reference - self.k - x, x, t_ms);
        let (upper_k, lower_k) = (self.upper.s, self.lower.s);
        let side = if upper_k > self.h && upper_k >= lower_k {
            Some(self.upper)
        } else if lower_k > self.h {
            Some(self.lower)
        } else {
            None
        };
        let shift = side.filter(|s| s.n > 0).map(|s| {
            let to = s.sum / f64::from(s.n);
            let shift = Shift {
                since_ms: s.since_ms,
                from_k: self.reference,
                to_k: to,
                samples: s.n,
            };
            self.reference = to;
            self.upper = CusumSide::default();
            self.lower = CusumSide::default();
            shift
        });
        CusumPoint {
            upper_k,
            lower_k,
            shift,
        }
    }

    /// The reference level the statistics are taken against (K).
    pub fn reference(&self) -> f64 {
        self.reference
    }

    pub fn state(&self) -> CusumState {
        CusumState {
            reference_k: self.reference,
            upper: self.upper,
            lower: self.lower,
        }
    }

    /// Restores a saved state; refuses (false) non-finite or negative statistics.
    pub fn set_state(&mut self, st: &CusumState) -> bool {
        let ok = |s: &CusumSide| s.s.is_finite() && s.s >= 0.0 && s.sum.is_finite();
        if !(st.reference_k.is_finite() && ok(&st.upper) && ok(&st.lower)) {
            return false;
        }
        self.reference = st.reference_k;
        self.upper = st.upper;
        self.lower = st.lower;
        true
    }
}

/// A straight-line trend of the approach against time (days) and the end-of-run forecast.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Trend {
    pub slope_per_day: f64,
    pub intercept: f64,
    /// Residual standard deviation.
    pub s: f64,
    pub n: usize,
    /// 95 % interval of the slope, K/day.
    pub slope_interval: (f64, f64),
    mean_x: f64,
    sxx: f64,
}

/// When the approach reaches a limit.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum EndOfRun {
    /// Day of the crossing at the fitted line, with an interval from the 95 % prediction
    /// band (earliest: upper band reaches the limit; latest: lower band does, if it does).
    At {
        day: f64,
        earliest: f64,
        latest: Option<f64>,
    },
    /// Slope zero or falling: no crossing ahead.
    NotRising,
}

fn median_sorted(v: &[f64]) -> f64 {
    let n = v.len();
    if n % 2 == 1 {
        v[n / 2]
    } else {
        0.5 * (v[n / 2 - 1] + v[n / 2])
    }
}

/// Two-sided 95 % Student t quantile for `dof` degrees of freedom (table values,
/// e.g. NIST/SEMATECH e-Handbook of Statistical Methods, table 1.3.6.7.2).
pub(crate) fn t95(dof: usize) -> f64 {
    const T: [f64; 30] = [
        12.706, 4.303, 3.182, 2.776, 2.571, 2.447, 2.365, 2.306, 2.262, 2.228, 2.201, 2.179, 2.160,
        2.145, 2.131, 2.120, 2.110, 2.101, 2.093, 2.086, 2.080, 2.074, 2.069, 2.064, 2.060, 2.056,
        2.052, 2.048, 2.045, 2.042,
    ];
    match dof {
        0 => f64::INFINITY,
        d if d <= 30 => T[d - 1],
        d if d <= 60 => 2.000 + (2.042 - 2.000) * (60 - d) as f64 / 30.0,
        d if d <= 120 => 1.980 + (2.000 - 1.980) * (120 - d) as f64 / 60.0,
        _ => 1.960,
    }
}

impl Trend {
    /// Least squares over (day, approach) points; None with fewer than 3 distinct days.
    pub fn fit(points: &[(f64, f64)]) -> Option<Self> {
        let n = points.len();
        if n < 3 {
            return None;
        }
        let mean_x = points.iter().map(|p| p.0).sum::<f64>() / n as f64;
        let mean_y = points.iter().map(|p| p.1).sum::<f64>() / n as f64;
        let sxx: f64 = points.iter().map(|p| (p.0 - mean_x).powi(2)).sum();
        if sxx.is_nan() || sxx <= 0.0 {
            return None;
        }
        let sxy: f64 = points.iter().map(|p| (p.0 - mean_x) * (p.1 - mean_y)).sum();
        let slope = sxy / sxx;
        let intercept = mean_y - slope * mean_x;
        let sse: f64 = points
            .iter()
            .map(|p| (p.1 - intercept - slope * p.0).powi(2))
            .sum();
        let s = (sse / (n - 2) as f64).sqrt();
        let half = t95(n - 2) * s / sxx.sqrt();
        Some(Self {
            slope_per_day: slope,
            intercept,
            s,
            n,
            slope_interval: (slope - half, slope + half),
            mean_x,
            sxx,
        })
    }

    /// Theil–Sen over (day, approach) points; None with fewer than 3 points or no two
    /// distinct days. `work` is scratch space (reused between calls to avoid allocation).
    pub fn fit_theil_sen(points: &[(f64, f64)], work: &mut Vec<f64>) -> Option<Self> {
        let n = points.len();
        if n < 3 {
            return None;
        }
        work.clear();
        for (i, a) in points.iter().enumerate() {
            for b in &points[i + 1..] {
                let dx = b.0 - a.0;
                if dx != 0.0 {
                    let m = (b.1 - a.1) / dx;
                    if m.is_finite() {
                        work.push(m);
                    }
                }
            }
        }
        if work.is_empty() {
            return None;
        }
        work.sort_unstable_by(f64::total_cmp);
        let slope = median_sorted(work);
        // Sen's rank interval (1-based ranks rounded to the nearest integer).
        let pairs = work.len() as f64;
        let c = 1.96 * ((n * (n - 1) * (2 * n + 5)) as f64 / 18.0).sqrt();
        let rank = |r: f64| (r.round() as usize).clamp(1, work.len()) - 1;
        let lower = work[rank((pairs - c) / 2.0)];
        let upper = work[rank((pairs + c) / 2.0 + 1.0)];
        work.clear();
        work.extend(points.iter().map(|p| p.1 - slope * p.0));
        work.sort_unstable_by(f64::total_cmp);
        let intercept = median_sorted(work);
        work.clear();
        work.extend(points.iter().map(|p| (p.1 - intercept - slope * p.0).abs()));
        work.sort_unstable_by(f64::total_cmp);
        let s = 1.4826 * median_sorted(work);
        let mean_x = points.iter().map(|p| p.0).sum::<f64>() / n as f64;
        let sxx: f64 = points.iter().map(|p| (p.0 - mean_x).powi(2)).sum();
        if sxx.is_nan() || sxx <= 0.0 {
            return None;
        }
        Some(Self {
            slope_per_day: slope,
            intercept,
            s,
            n,
            slope_interval: (lower, upper),
            mean_x,
            sxx,
        })
    }

    /// Half-width of the 95 % prediction band at day `x`.
    pub fn band(&self, x: f64) -> f64 {
        t95(self.n - 2)
            * self.s
            * (1.0 + 1.0 / self.n as f64 + (x - self.mean_x).powi(2) / self.sxx).sqrt()
    }

    /// The day the approach reaches `limit_k`, with its interval.
    pub fn end_of_run(&self, limit_k: f64) -> EndOfRun {
        if self.slope_per_day.is_nan() || self.slope_per_day <= 0.0 {
            return EndOfRun::NotRising;
        }
        let day = (limit_k - self.intercept) / self.slope_per_day;
        // Bands are solved numerically: the upper (lower) band reaches the limit first (last).
        let cross = |sign: f64| -> Option<f64> {
            let f =
                |x: f64| self.intercept + self.slope_per_day * x + sign * self.band(x) - limit_k;
            let (mut lo, mut hi) = (self.mean_x - 1e6, self.mean_x + 1e6);
            if f(lo) > 0.0 || f(hi) < 0.0 {
                return None;
            }
            for _ in 0..200 {
                let mid = 0.5 * (lo + hi);
                if f(mid) > 0.0 { hi = mid } else { lo = mid }
            }
            Some(0.5 * (lo + hi))
        };
        EndOfRun::At {
            day,
            earliest: cross(1.0).unwrap_or(day),
            latest: cross(-1.0),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// docs/domain.md §7 check vectors [derived]: ten 10.0 then ten 12.0.
    fn series() -> Vec<f64> {
        std::iter::repeat_n(10.0, 10)
            .chain(std::iter::repeat_n(12.0, 10))
            .collect()
    }

    #[test]
    fn ewma_first_signal_at_sample_14() {
        // μ0 = 10, σ = 1, λ = 0.2, L = 3 → first signal at sample 14 with z = 11.1808
        // (docs/domain.md §7 [derived], Roberts 1959 limits).
        let mut e = Ewma::new(10.0, 1.0, 0.2, 3.0).unwrap();
        let mut first = None;
        for (i, x) in series().into_iter().enumerate() {
            let p = e.push(x);
            if p.signal && first.is_none() {
                first = Some((i + 1, p.z));
            }
        }
        let (i, z) = first.unwrap();
        assert_eq!(i, 14);
        assert!((z - 11.1808).abs() < 1e-4, "{z}");
        assert!(Ewma::new(10.0, 1.0, 0.0, 3.0).is_err());
    }

    #[test]
    fn cusum_first_signal_at_sample_14() {
        // k = 0.5, h = 5 on the same series → first signal at sample 14 (docs/domain.md §7 [derived]).
        let mut c = Cusum::new(10.0, 0.5, 5.0).unwrap();
        let points: Vec<CusumPoint> = series()
            .into_iter()
            .enumerate()
            .map(|(i, x)| c.push(x, i as i64 + 1))
            .collect();
        let first = points.iter().position(|p| p.shift.is_some()).map(|i| i + 1);
        assert_eq!(first, Some(14));
        // Page's change-point estimate [derived by hand from the recursion]: S⁺ left 0 at
        // sample 11 (1.5, 3.0, 4.5, 6.0 > 5), so the shift is from 10 to mean(12 × 4) = 12.
        let shift = points[13].shift.unwrap();
        assert_eq!(shift.since_ms, 11);
        assert_eq!((shift.from_k, shift.to_k, shift.samples), (10.0, 12.0, 4));
        // Restarted against the new level: the rest of the step signals nothing more.
        assert!(
            points[14..]
                .iter()
                .all(|p| p.shift.is_none() && p.upper_k == 0.0)
        );
        assert_eq!(c.reference(), 12.0);
    }

    #[test]
    fn cusum_finds_a_step_down_too() {
        // Mirror of the check above: ten 12.0 then ten 10.0 against 12 [derived].
        let mut c = Cusum::new(12.0, 0.5, 5.0).unwrap();
        let xs = std::iter::repeat_n(12.0, 10).chain(std::iter::repeat_n(10.0, 10));
        let shifts: Vec<(usize, Shift)> = xs
            .enumerate()
            .filter_map(|(i, x)| c.push(x, i as i64 + 1).shift.map(|s| (i + 1, s)))
            .collect();
        assert_eq!(shifts.len(), 1);
        assert_eq!(shifts[0].0, 14);
        assert_eq!((shifts[0].1.from_k, shifts[0].1.to_k), (12.0, 10.0));
    }

    proptest::proptest! {
        /// Under a permanent step of any size with noise, the statistics stay bounded by
        /// h plus one sample's excursion, and a step well past h signals once.
        #[test]
        fn cusum_is_bounded_under_a_permanent_step(
            step in 3.0f64..200.0,
            noise in proptest::collection::vec(-0.3f64..0.3, 400),
        ) {
            let (k, h) = (0.5, 5.0);
            let mut c = Cusum::new(0.0, k, h).unwrap();
            let mut signals = 0;
            for (i, e) in noise.iter().enumerate() {
                let x = if i < 50 { *e } else { step + e };
                let before = c.reference();
                let p = c.push(x, i as i64);
                // Without the restart S⁺ would pass 50 000 K here.
                let bound = h + (x - before).abs();
                proptest::prop_assert!(p.upper_k <= bound && p.lower_k <= bound);
                if p.shift.is_some() {
                    signals += 1;
                }
            }
            proptest::prop_assert_eq!(signals, 1);
        }
    }

    #[test]
    fn linear_end_of_run() {
        // docs/domain.md §7 [derived]: days [0..180 by 30], approach [5.0, 5.6, 6.1, 6.8, 7.2, 7.9, 8.4]
        // → slope 0.018929 K/day, intercept 5.010714, a 20 K limit at day 791.89.
        let days = [0.0, 30.0, 60.0, 90.0, 120.0, 150.0, 180.0];
        let y = [5.0, 5.6, 6.1, 6.8, 7.2, 7.9, 8.4];
        let pts: Vec<(f64, f64)> = days.iter().copied().zip(y.iter().copied()).collect();
        let t = Trend::fit(&pts).unwrap();
        assert!((t.slope_per_day - 0.018929).abs() < 1e-6);
        assert!((t.intercept - 5.010714).abs() < 1e-6);
        match t.end_of_run(20.0) {
            EndOfRun::At {
                day,
                earliest,
                latest,
            } => {
                assert!((day - 791.89).abs() < 0.01, "{day}");
                assert!(
                    earliest < day && latest.is_some_and(|l| l > day),
                    "{earliest} {latest:?}"
                );
            }
            other => panic!("{other:?}"),
        }
        let flat: Vec<(f64, f64)> = days.iter().map(|d| (*d, 5.0 - d * 1e-3)).collect();
        assert_eq!(
            Trend::fit(&flat).unwrap().end_of_run(20.0),
            EndOfRun::NotRising
        );
        assert!(Trend::fit(&pts[..2]).is_none());
    }

    #[test]
    fn theil_sen() {
        // docs/domain.md §7 days and approaches: 21 pairwise slopes, median 0.0188889 K/day,
        // intercept 5.0, Sen's interval ranks 4 and 18 → [0.0177778, 0.0200000]
        // [derived: computed with Python 3.11 statistics.median over the pairs].
        let p: Vec<(f64, f64)> = [0.0, 30.0, 60.0, 90.0, 120.0, 150.0, 180.0]
            .into_iter()
            .zip([5.0, 5.6, 6.1, 6.8, 7.2, 7.9, 8.4])
            .collect();
        let mut work = Vec::new();
        let t = Trend::fit_theil_sen(&p, &mut work).unwrap();
        assert!((t.slope_per_day - 0.018_888_889).abs() < 1e-8, "{t:?}");
        assert!((t.intercept - 5.0).abs() < 1e-9);
        assert!((t.slope_interval.0 - 0.017_777_778).abs() < 1e-8);
        assert!((t.slope_interval.1 - 0.02).abs() < 1e-9);
        // One wild aggregate barely moves it; least squares is dragged away [derived:
        // exact line 5 + 0.02·x with one outlier: 15 of 21 pairwise slopes are 0.02].
        let mut q: Vec<(f64, f64)> = (0..7)
            .map(|i| (30.0 * i as f64, 5.0 + 0.6 * i as f64))
            .collect();
        q[3].1 = 50.0;
        let ts = Trend::fit_theil_sen(&q, &mut work).unwrap();
        assert!((ts.slope_per_day - 0.02).abs() < 1e-12, "{ts:?}");
        let ls = Trend::fit(&q).unwrap();
        assert!(ls.s > 10.0 * ts.s.max(1e-9));
        // Too few points, or one day only.
        assert!(Trend::fit_theil_sen(&q[..2], &mut work).is_none());
        assert!(Trend::fit_theil_sen(&[(1.0, 1.0), (1.0, 2.0), (1.0, 3.0)], &mut work).is_none());
    }

    #[test]
    fn least_squares_slope_interval() {
        // docs/domain.md §7 data: s = 0.0956 from the fit, t(5) = 2.571 (NIST/SEMATECH table),
        // Sxx = 25200 → half-width 2.571·s/√Sxx [derived].
        let p: Vec<(f64, f64)> = [0.0, 30.0, 60.0, 90.0, 120.0, 150.0, 180.0]
            .into_iter()
            .zip([5.0, 5.6, 6.1, 6.8, 7.2, 7.9, 8.4])
            .collect();
        let t = Trend::fit(&p).unwrap();
        let half = 2.571 * t.s / 25_200f64.sqrt();
        assert!((t.slope_interval.1 - t.slope_per_day - half).abs() < 1e-12);
        assert!(t.slope_interval.0 < t.slope_per_day && t.slope_per_day < t.slope_interval.1);
    }
}
