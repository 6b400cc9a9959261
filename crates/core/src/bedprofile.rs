//! The bed temperature profile of an adiabatic, exothermic bed (a shift converter, an SO2
//! converter pass, a methanator) from thermocouples at known depths: the total rise, the
//! weighted average bed temperature (WABT), and the depth at which a set fraction of the
//! rise is reached, the **reaction front**. As a catalyst dies from the top (poisoning by
//! sulphur or chloride, condensation, sintering) the front moves down the bed; its rate
//! projects the day the front reaches the depth at which the bed can no longer reach
//! equilibrium (the end of life). This is the classic method for low-temperature shift
//! catalyst (docs/domain.md §10 [common practice]).
//!
//! Pure: readings in, numbers out; no I/O, no clock (days are passed in).
//!
//! # Method
//! - Points are (depth from the top of the catalyst, temperature), the first at the bed
//!   inlet, the last at the outlet. Rise ΔT = T_last − T_first.
//! - Front at fraction f (default 0.9): the smallest depth at which
//!   T(d) ≥ T_first + f ΔT, interpolated between neighbouring thermocouples (the first
//!   crossing: a bed that loses heat below a hot spot still has its front where the
//!   reaction happened). `Linear` interpolates the temperature. `LogRemaining`
//!   interpolates the logarithm of the rise still to come, r(d) = (T_last − T(d))/ΔT,
//!   which is linear in depth in the reacting zone of a first-order adiabatic plug-flow
//!   bed (r = exp(−(d − d₀)/λ) [common practice]), so a few thermocouples place the
//!   front without the bias of a straight line across a curved profile; where r of the
//!   deeper point is below [`LOG_REMAINING_MIN`] (the outlet, or noise near it) the
//!   segment falls back to linear. No front when the rise is below `min_rise_k` (a bed
//!   doing nothing, or a bypass: any "front" would be thermocouple noise), when fewer
//!   than three thermocouples are usable (inlet and outlet alone say nothing about where
//!   the rise happens), or when the rise is negative.
//! - WABT, three conventions (configured; the figure must travel with its convention):
//!   `InletOutlet`: (T_in + 2 T_out)/3 (docs/domain.md §7 [common practice]; e.g. 350 °C
//!   in, 395 °C out → 380 °C); `DepthAverage`: the depth-weighted mean (1/L)∫T dd by the
//!   trapezoidal rule over the thermocouples, which is the mean temperature of the
//!   catalyst when the catalyst is spread evenly [common practice]; `Weighted`: Σ w_i T_i /
//!   Σ w_i with the catalyst mass (or volume) each thermocouple stands for [common
//!   practice for multi-bed reactors: beds weighted by their catalyst weight; from memory].
//! - The front's movement: least squares of the daily mean front depth against the day
//!   ([`crate::monitor::drift::Trend`], with its 95 % prediction band), and the day the
//!   line reaches the end-of-life depth, with the interval from that band.

use thiserror::Error;

use crate::monitor::drift::{EndOfRun, Trend};

/// How the WABT is formed.
#[derive(Debug, Clone, PartialEq)]
pub enum WabtMethod {
    /// (T_in + 2 T_out)/3.
    InletOutlet,
    /// Depth-weighted mean over the thermocouples (trapezoidal rule).
    DepthAverage,
    /// Σ w_i T_i / Σ w_i, one weight per configured thermocouple (catalyst mass or
    /// volume each stands for).
    Weighted(Vec<f64>),
}

impl WabtMethod {
    /// The convention's name as results carry it.
    pub fn label(&self) -> &'static str {
        match self {
            Self::InletOutlet => "inlet-outlet",
            Self::DepthAverage => "depth-average",
            Self::Weighted(_) => "weighted",
        }
    }
}

/// How the front is placed between two thermocouples.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FrontInterpolation {
    Linear,
    LogRemaining,
}

impl FrontInterpolation {
    pub fn label(self) -> &'static str {
        match self {
            Self::Linear => "linear",
            Self::LogRemaining => "log-remaining",
        }
    }
}

/// Smallest remaining-rise fraction the logarithmic interpolation uses (below it the
/// thermocouples' 1–2 K noise dominates a typical 20 K rise [common practice]).
pub const LOG_REMAINING_MIN: f64 = 0.02;

/// What the profile needs to know about a bed.
#[derive(Debug, Clone, PartialEq)]
pub struct BedGeometry {
    /// Catalyst depth, m (the front is also given as a fraction of it).
    pub depth_m: f64,
    /// Fraction of the total rise that marks the front (0 < f < 1).
    pub front_fraction: f64,
    /// Rises below this say nothing about a front, K.
    pub min_rise_k: f64,
    pub wabt: WabtMethod,
    /// The front depth at which the catalyst is spent (the forecast's limit), m.
    pub end_of_life_depth_m: f64,
    pub interpolation: FrontInterpolation,
}

/// One usable thermocouple reading: its index in the configured list, depth (m from the
/// top of the catalyst) and temperature (K).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BedPoint {
    pub index: usize,
    pub depth_m: f64,
    pub t_k: f64,
}

/// Why a front could not be given.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum NoFront {
    /// Fewer than three usable thermocouples.
    TooFewPoints,
    /// The rise is below the configured minimum (or negative).
    RiseTooSmall,
}

impl NoFront {
    pub fn as_str(self) -> &'static str {
        match self {
            Self::TooFewPoints => "fewer than three usable bed thermocouples",
            Self::RiseTooSmall => "bed temperature rise below its minimum",
        }
    }
}

/// The profile of one bed at one time.
#[derive(Debug, Clone, PartialEq)]
pub struct BedProfile {
    pub inlet_k: f64,
    pub outlet_k: f64,
    pub rise_k: f64,
    pub wabt_k: f64,
    /// Depth of the front, m, and as a fraction of the catalyst depth.
    pub front: Result<Front, NoFront>,
    /// The hottest point when it lies above the outlet by more than [`HOT_SPOT_K`]
    /// (heat lost below the reaction zone, or a thermocouple reading high).
    pub hot_spot: Option<BedPoint>,
    /// Usable thermocouples of the configured ones.
    pub points_used: usize,
}

/// The reaction front.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Front {
    pub depth_m: f64,
    pub fraction_of_bed: f64,
}

/// A point hotter than the outlet by more than this is reported as a hot spot, K
/// [common practice: thermocouples agree to about 1–2 K; a few K is a real feature].
pub const HOT_SPOT_K: f64 = 3.0;

#[derive(Debug, Clone, PartialEq, Error)]
pub enum BedProfileError {
    #[error("bed depth must be a positive number of metres, got {0}")]
    Depth(f64),
    #[error("front fraction must lie strictly between 0 and 1, got {0}")]
    FrontFraction(f64),
    #[error("minimum rise must be a non-negative number of kelvin, got {0}")]
    MinRise(f64),
    #[error("end-of-life depth must lie in (0, {depth}] m, got {got}")]
    EndOfLife { got: f64, depth: f64 },
    #[error(
        "thermocouple depths must increase down the bed and lie within 0..={depth} m: number {index} is at {got} m"
    )]
    PointDepth { index: usize, got: f64, depth: f64 },
    #[error(
        "{got} WABT weights for {points} bed thermocouples (one each, non-negative, not all zero)"
    )]
    Weights { got: usize, points: usize },
    #[error("at least two bed thermocouples are needed (inlet and outlet), got {0}")]
    TooFew(usize),
}

impl BedGeometry {
    /// Checks the geometry against the configured thermocouple depths (m, in order).
    pub fn validate(&self, depths: &[f64]) -> Result<(), BedProfileError> {
        if !(self.depth_m.is_finite() && self.depth_m > 0.0) {
            return Err(BedProfileError::Depth(self.depth_m));
        }
        if !(self.front_fraction > 0.0 && self.front_fraction < 1.0) {
            return Err(BedProfileError::FrontFraction(self.front_fraction));
        }
        if !(self.min_rise_k.is_finite() && self.min_rise_k >= 0.0) {
            return Err(BedProfileError::MinRise(self.min_rise_k));
        }
        let eol = self.end_of_life_depth_m;
        if !(eol > 0.0 && eol <= self.depth_m) {
            return Err(BedProfileError::EndOfLife {
                got: eol,
                depth: self.depth_m,
            });
        }
        if depths.len() < 2 {
            return Err(BedProfileError::TooFew(depths.len()));
        }
        let mut last = f64::NEG_INFINITY;
        for (index, &d) in depths.iter().enumerate() {
            if !(d >= 0.0 && d <= self.depth_m && d > last) {
                return Err(BedProfileError::PointDepth {
                    index: index + 1,
                    got: d,
                    depth: self.depth_m,
                });
            }
            last = d;
        }
        if let WabtMethod::Weighted(w) = &self.wabt {
            let ok = w.len() == depths.len()
                && w.iter().all(|x| x.is_finite() && *x >= 0.0)
                && w.iter().sum::<f64>() > 0.0;
            if !ok {
                return Err(BedProfileError::Weights {
                    got: w.len(),
                    points: depths.len(),
                });
            }
        }
        Ok(())
    }

    /// The profile from the usable points (ordered by depth; the caller leaves out
    /// stale or bad thermocouples). `None` unless both the first and the last configured
    /// thermocouple (`configured` of them) are among the points: without the inlet or
    /// the outlet there is no rise.
    pub fn profile(&self, points: &[BedPoint], configured: usize) -> Option<BedProfile> {
        let (first, last) = (points.first()?, points.last()?);
        if first.index != 0 || last.index + 1 != configured || points.len() < 2 {
            return None;
        }
        let rise_k = last.t_k - first.t_k;
        let front = if points.len() < 3 {
            Err(NoFront::TooFewPoints)
        } else if !(rise_k >= self.min_rise_k && rise_k > 0.0) {
            Err(NoFront::RiseTooSmall)
        } else {
            Ok(self.front_at(points, first.t_k + self.front_fraction * rise_k, last.t_k))
        };
        let hottest = points
            .iter()
            .copied()
            .max_by(|a, b| a.t_k.total_cmp(&b.t_k));
        let hot_spot = hottest.filter(|h| h.t_k > last.t_k + HOT_SPOT_K);
        Some(BedProfile {
            inlet_k: first.t_k,
            outlet_k: last.t_k,
            rise_k,
            wabt_k: self.wabt_of(points),
            front: front.map(|depth_m| Front {
                depth_m,
                fraction_of_bed: depth_m / self.depth_m,
            }),
            hot_spot,
            points_used: points.len(),
        })
    }

    /// Depth of the first crossing of `target` (see the module notes).
    fn front_at(&self, points: &[BedPoint], target: f64, outlet_k: f64) -> f64 {
        let rise = outlet_k - points.first().map_or(outlet_k, |p| p.t_k);
        for pair in points.windows(2) {
            let (a, b) = (pair[0], pair[1]);
            if b.t_k >= target {
                let span = b.t_k - a.t_k;
                let linear = if span > 0.0 {
                    ((target - a.t_k) / span).clamp(0.0, 1.0)
                } else {
                    1.0
                };
                let (ra, rb) = ((outlet_k - a.t_k) / rise, (outlet_k - b.t_k) / rise);
                let rt = (outlet_k - target) / rise;
                let x = match self.interpolation {
                    FrontInterpolation::LogRemaining
                        if rb >= LOG_REMAINING_MIN && ra > rb && rt > 0.0 =>
                    {
                        ((ra.ln() - rt.ln()) / (ra.ln() - rb.ln())).clamp(0.0, 1.0)
                    }
                    _ => linear,
                };
                return a.depth_m + x * (b.depth_m - a.depth_m);
            }
        }
        points.last().map_or(self.depth_m, |p| p.depth_m)
    }

    fn wabt_of(&self, points: &[BedPoint]) -> f64 {
        let (first, last) = match (points.first(), points.last()) {
            (Some(f), Some(l)) => (f, l),
            _ => return f64::NAN,
        };
        match &self.wabt {
            WabtMethod::InletOutlet => (first.t_k + 2.0 * last.t_k) / 3.0,
            WabtMethod::DepthAverage => {
                let span = last.depth_m - first.depth_m;
                let area: f64 = points
                    .windows(2)
                    .map(|w| 0.5 * (w[0].t_k + w[1].t_k) * (w[1].depth_m - w[0].depth_m))
                    .sum();
                if span > 0.0 { area / span } else { f64::NAN }
            }
            WabtMethod::Weighted(w) => {
                // Weights of missing thermocouples are left out (the rest renormalised).
                let (mut sum, mut wsum) = (0.0, 0.0);
                for p in points {
                    let wi = w.get(p.index).copied().unwrap_or(0.0);
                    sum += wi * p.t_k;
                    wsum += wi;
                }
                if wsum > 0.0 { sum / wsum } else { f64::NAN }
            }
        }
    }
}

/// Days of daily front depths kept for the trend at most (two years of daily figures).
pub const FRONT_DAYS_MAX: usize = 730;
/// Daily figures needed before a rate and a forecast are given [common practice: a week
/// of daily figures before a trend is read].
pub const FRONT_DAYS_MIN: usize = 7;

/// The front's movement down the bed over a run, from daily means.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct FrontTrend {
    /// (day number, sum of front depths, count), oldest first.
    days: Vec<(i64, f64, u32)>,
}

/// The front's rate and forecast.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FrontForecast {
    /// m/day, and its 95 % interval.
    pub rate_m_per_day: f64,
    pub rate_interval: (f64, f64),
    /// Days in the fit.
    pub days: usize,
    /// The day number at which the fitted line reaches the end-of-life depth.
    pub end_of_life: EndOfRun,
}

impl FrontTrend {
    /// Adds a front depth on day `day` (days since the Unix epoch, from the caller's
    /// clock of sample times).
    pub fn push(&mut self, day: i64, depth_m: f64) {
        if !depth_m.is_finite() {
            return;
        }
        match self.days.last_mut() {
            Some(last) if last.0 == day => {
                last.1 += depth_m;
                last.2 += 1;
            }
            Some(last) if last.0 > day => {} // out of order: the daily mean is closed
            _ => {
                self.days.push((day, depth_m, 1));
                if self.days.len() > FRONT_DAYS_MAX {
                    self.days.remove(0);
                }
            }
        }
    }

    /// Days with a figure.
    pub fn len(&self) -> usize {
        self.days.len()
    }

    pub fn is_empty(&self) -> bool {
        self.days.is_empty()
    }

    /// Starts again (a catalyst change or a re-baseline).
    pub fn clear(&mut self) {
        self.days.clear();
    }

    /// Daily means, (day, m), oldest first (for reports and the saved state).
    pub fn daily(&self) -> impl Iterator<Item = (i64, f64)> + '_ {
        self.days.iter().map(|d| (d.0, d.1 / f64::from(d.2)))
    }

    /// Rebuilds from saved daily means.
    pub fn from_daily(daily: impl IntoIterator<Item = (i64, f64)>) -> Self {
        let mut t = Self::default();
        for (day, m) in daily {
            t.push(day, m);
        }
        t
    }

    /// The rate and the end-of-life day, once [`FRONT_DAYS_MIN`] complete days are in
    /// (today's, still filling, is left out).
    pub fn forecast(&self, end_of_life_depth_m: f64) -> Option<FrontForecast> {
        let complete = self.days.len().checked_sub(1)?;
        if complete < FRONT_DAYS_MIN {
            return None;
        }
        let points: Vec<(f64, f64)> = self
            .days
            .iter()
            .take(complete)
            .map(|d| (d.0 as f64, d.1 / f64::from(d.2)))
            .collect();
        let fit = Trend::fit(&points)?;
        Some(FrontForecast {
            rate_m_per_day: fit.slope_per_day,
            rate_interval: fit.slope_interval,
            days: fit.n,
            end_of_life: fit.end_of_run(end_of_life_depth_m),
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const C: f64 = 273.15;

    fn geometry(wabt: WabtMethod) -> BedGeometry {
        BedGeometry {
            depth_m: 4.0,
            front_fraction: 0.9,
            min_rise_k: 5.0,
            wabt,
            end_of_life_depth_m: 3.6,
            interpolation: FrontInterpolation::Linear,
        }
    }

    fn points(ts_c: &[(f64, f64)]) -> Vec<BedPoint> {
        ts_c.iter()
            .enumerate()
            .map(|(index, &(d, t))| BedPoint {
                index,
                depth_m: d,
                t_k: t + C,
            })
            .collect()
    }

    #[test]
    fn wabt_inlet_outlet_matches_the_worked_example() {
        // 350 °C in, 395 °C out → 380 °C (docs/domain.md §7 [common practice]).
        let g = geometry(WabtMethod::InletOutlet);
        let p = g
            .profile(&points(&[(0.0, 350.0), (2.0, 390.0), (4.0, 395.0)]), 3)
            .unwrap();
        assert!((p.wabt_k - (380.0 + C)).abs() < 1e-9, "{}", p.wabt_k);
        assert!((p.rise_k - 45.0).abs() < 1e-9);
    }

    #[test]
    fn depth_average_is_the_trapezoidal_mean() {
        // Invented profile, hand-computed: segments 0–1 m (200→230), 1–2 m (230→240),
        // 2–4 m (240→242): area = 215 + 235 + 2·241 = 932 °C·m over 4 m → 233.0 °C.
        let g = geometry(WabtMethod::DepthAverage);
        let p = g
            .profile(
                &points(&[(0.0, 200.0), (1.0, 230.0), (2.0, 240.0), (4.0, 242.0)]),
                4,
            )
            .unwrap();
        assert!((p.wabt_k - (233.0 + C)).abs() < 1e-9, "{}", p.wabt_k);
        // A linear profile's depth average is its midpoint temperature (exact for the
        // trapezoidal rule) [common practice].
        let lin = g
            .profile(&points(&[(0.0, 200.0), (1.0, 210.0), (4.0, 240.0)]), 3)
            .unwrap();
        assert!((lin.wabt_k - (220.0 + C)).abs() < 1e-9);
    }

    #[test]
    fn weighted_wabt_renormalises_over_the_usable_points() {
        // Invented: weights 1, 2, 1 on 200, 220, 240 °C → (200 + 440 + 240)/4 = 220 °C.
        let g = geometry(WabtMethod::Weighted(vec![1.0, 2.0, 1.0]));
        let all = points(&[(0.0, 200.0), (2.0, 220.0), (4.0, 240.0)]);
        let p = g.profile(&all, 3).unwrap();
        assert!((p.wabt_k - (220.0 + C)).abs() < 1e-9);
        // Middle thermocouple missing: (200 + 240)/2 = 220 °C still; the front cannot be
        // placed with two points.
        let two = vec![all[0], all[2]];
        let q = g.profile(&two, 3).unwrap();
        assert!((q.wabt_k - (220.0 + C)).abs() < 1e-9);
        assert_eq!(q.front, Err(NoFront::TooFewPoints));
    }

    #[test]
    fn front_is_the_first_crossing_by_linear_interpolation() {
        // Invented: rise 200 → 240 °C, 90 % target 236 °C lies between 1.0 m (230) and
        // 2.0 m (238): 1.0 + 6/8 = 1.75 m, 43.75 % of the 4 m bed.
        let g = geometry(WabtMethod::InletOutlet);
        let p = g
            .profile(
                &points(&[(0.0, 200.0), (1.0, 230.0), (2.0, 238.0), (4.0, 240.0)]),
                4,
            )
            .unwrap();
        let f = p.front.unwrap();
        assert!((f.depth_m - 1.75).abs() < 1e-12, "{}", f.depth_m);
        assert!((f.fraction_of_bed - 0.4375).abs() < 1e-12);
        assert_eq!(p.hot_spot, None);
    }

    #[test]
    fn log_remaining_places_the_front_of_an_exponential_profile_exactly() {
        // Invented first-order profile: dead layer 0.3 m, λ = 0.25 m, rise 22 K:
        // T(d) = 200 + 22 (1 − exp(−(d − 0.3)/0.25)); its 90 % depth is
        // 0.3 + 0.25 ln 10 = 0.875646 m (derived). Thermocouples at 0, 0.8, 1.6, 2.4, 3.2 m
        // with the outlet taken as the full rise.
        let t = |d: f64| 200.0 + 22.0 * (1.0 - (-((d - 0.3_f64).max(0.0)) / 0.25).exp());
        let pts: Vec<(f64, f64)> = [0.0, 0.8, 1.6, 2.4]
            .iter()
            .map(|&d| (d, t(d)))
            .chain(std::iter::once((3.2, 222.0)))
            .collect();
        let mut g = geometry(WabtMethod::InletOutlet);
        g.interpolation = FrontInterpolation::LogRemaining;
        let exact = 0.3 + 0.25 * 10f64.ln();
        // The crossing lies between 0.8 m (remaining e^-2 = 0.135) and 1.6 m (e^-5.2 =
        // 0.0055, below the floor): that segment falls back to linear. With the third
        // thermocouple at 1.2 m instead (e^-3.6 = 0.027) the log method applies.
        let pts2: Vec<(f64, f64)> = pts
            .iter()
            .map(|&(d, v)| if d == 1.6 { (1.2, t(1.2)) } else { (d, v) })
            .collect();
        let p = g.profile(&points(&pts2), 5).unwrap();
        let f = p.front.unwrap().depth_m;
        // Exact but for the outlet, taken as the full rise (short by 22·e^-11.6 K).
        assert!((f - exact).abs() < 1e-4, "{f} vs {exact}");
        // Linear interpolation across the same segment lies deeper.
        g.interpolation = FrontInterpolation::Linear;
        let lin = g.profile(&points(&pts2), 5).unwrap().front.unwrap().depth_m;
        assert!(lin > exact + 0.05, "{lin}");
        // Where the deeper point is within noise of the outlet, the log method falls
        // back to linear (the same figure as linear).
        g.interpolation = FrontInterpolation::LogRemaining;
        let fb = g.profile(&points(&pts), 5).unwrap().front.unwrap().depth_m;
        g.interpolation = FrontInterpolation::Linear;
        let lin2 = g.profile(&points(&pts), 5).unwrap().front.unwrap().depth_m;
        assert!((fb - lin2).abs() < 1e-12);
    }

    #[test]
    fn a_hot_spot_above_the_outlet_is_reported_and_the_front_stays_at_the_first_crossing() {
        // Invented: 200, 245 (1 m), 243 (2 m), 238 °C outlet: rise 38 K, target 234.2 °C
        // crossed between 0 and 1 m at 34.2/45 = 0.76 m; hot spot 7 K above the outlet.
        let g = geometry(WabtMethod::InletOutlet);
        let p = g
            .profile(
                &points(&[(0.0, 200.0), (1.0, 245.0), (2.0, 243.0), (4.0, 238.0)]),
                4,
            )
            .unwrap();
        assert!((p.front.unwrap().depth_m - 0.76).abs() < 1e-12);
        assert_eq!(p.hot_spot.map(|h| h.index), Some(1));
    }

    #[test]
    fn no_front_without_a_meaningful_rise_and_no_profile_without_both_ends() {
        let g = geometry(WabtMethod::InletOutlet);
        let flat = g
            .profile(&points(&[(0.0, 200.0), (2.0, 201.0), (4.0, 202.0)]), 3)
            .unwrap();
        assert_eq!(flat.front, Err(NoFront::RiseTooSmall));
        let falling = g
            .profile(&points(&[(0.0, 220.0), (2.0, 210.0), (4.0, 200.0)]), 3)
            .unwrap();
        assert_eq!(falling.front, Err(NoFront::RiseTooSmall));
        // Outlet missing (last configured is index 3).
        let pts = points(&[(0.0, 200.0), (1.0, 230.0), (2.0, 238.0)]);
        assert_eq!(g.profile(&pts, 4), None);
        // Inlet missing.
        assert_eq!(g.profile(&pts[1..], 3), None);
        assert_eq!(g.profile(&[], 3), None);
    }

    #[test]
    fn validation_names_what_is_wrong() {
        let g = geometry(WabtMethod::InletOutlet);
        assert!(g.validate(&[0.0, 1.0, 4.0]).is_ok());
        assert_eq!(
            g.validate(&[0.0, 2.0, 1.0]),
            Err(BedProfileError::PointDepth {
                index: 3,
                got: 1.0,
                depth: 4.0
            })
        );
        assert!(matches!(
            g.validate(&[0.0, 5.0]),
            Err(BedProfileError::PointDepth { index: 2, .. })
        ));
        assert_eq!(g.validate(&[0.0]), Err(BedProfileError::TooFew(1)));
        let w = geometry(WabtMethod::Weighted(vec![1.0]));
        assert!(matches!(
            w.validate(&[0.0, 4.0]),
            Err(BedProfileError::Weights { got: 1, points: 2 })
        ));
        let mut bad = geometry(WabtMethod::InletOutlet);
        bad.front_fraction = 1.0;
        assert!(matches!(
            bad.validate(&[0.0, 4.0]),
            Err(BedProfileError::FrontFraction(_))
        ));
        bad.front_fraction = 0.9;
        bad.end_of_life_depth_m = 4.5;
        assert!(matches!(
            bad.validate(&[0.0, 4.0]),
            Err(BedProfileError::EndOfLife { .. })
        ));
    }

    #[test]
    fn front_trend_forecasts_the_end_of_life_day() {
        // Invented: the front moves 0.01 m/day from 1.0 m on day 0 (three readings a day
        // around the daily value); the 3.6 m end of life is reached on day 260.
        let mut t = FrontTrend::default();
        for day in 0..=30 {
            for k in [-1.0, 0.0, 1.0] {
                t.push(day, 1.0 + 0.01 * day as f64 + 0.002 * k);
            }
        }
        let f = t.forecast(3.6).unwrap();
        assert_eq!(f.days, 30, "today's partial day is left out");
        assert!((f.rate_m_per_day - 0.01).abs() < 1e-9);
        match f.end_of_life {
            EndOfRun::At { day, .. } => assert!((day - 260.0).abs() < 1e-6, "{day}"),
            EndOfRun::NotRising => panic!("rising front"),
        }
        // Too few days: no forecast.
        let mut short = FrontTrend::default();
        for day in 0..5 {
            short.push(day, 1.0);
        }
        assert_eq!(short.forecast(3.6), None);
        // Saved and rebuilt from daily means: the same forecast.
        let again = FrontTrend::from_daily(t.daily().collect::<Vec<_>>());
        assert_eq!(again.forecast(3.6).map(|f| f.days), Some(30));
    }

    #[test]
    fn the_front_trend_keeps_a_bounded_window_and_ignores_bad_values() {
        let mut t = FrontTrend::default();
        for day in 0..(FRONT_DAYS_MAX as i64 + 100) {
            t.push(day, 1.0);
        }
        t.push(5, 9.0); // out of order
        t.push(10_000, f64::NAN);
        assert_eq!(t.daily().count(), FRONT_DAYS_MAX);
        assert!(t.daily().all(|(_, m)| m == 1.0));
    }
}
