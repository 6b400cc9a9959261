//! Peng–Robinson fugacity coefficients for gas mixtures (van der Waals one-fluid
//! mixing with optional binary interaction parameters k_ij).
//!
//! Pure and allocation-free once built: the caller owns the output slices and a
//! [`PrScratch`] sized for the mixture.
//!
//! # References
//! - D.-Y. Peng, D. B. Robinson, Ind. Eng. Chem. Fundam. 15 (1976) 59: the equation,
//!   κ = 0.37464 + 1.54226 ω − 0.26992 ω², and the fugacity-coefficient expression.
//! - Ωa = 0.45723553, Ωb = 0.07779607: the exact roots of the critical conditions
//!   (the rounded 0.45724/0.07780 move φ by about 1e-5, docs/domain.md §4).

use thiserror::Error;

use super::species::R_J_PER_MOL_K;

pub const OMEGA_A: f64 = 0.457_235_53;
pub const OMEGA_B: f64 = 0.077_796_07;
const SQRT2: f64 = std::f64::consts::SQRT_2;

/// Critical constants of one component.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PrComponent {
    pub tc_k: f64,
    pub pc_bar: f64,
    pub omega: f64,
}

#[derive(Debug, Clone, PartialEq, Error)]
pub enum PrError {
    #[error("peng-robinson: k_ij matrix must be {n}x{n} with k_ii = 0 and k_ij = k_ji")]
    BadKij { n: usize },
    #[error("peng-robinson: component {index} has non-physical critical constants")]
    BadComponent { index: usize },
    #[error("peng-robinson: no real compressibility root above B at {t_k} K, {p_bar} bar")]
    NoRoot { t_k: f64, p_bar: f64 },
}

/// The equation of state for a fixed list of components.
#[derive(Debug, Clone, PartialEq)]
pub struct PengRobinson {
    comps: Vec<PrComponent>,
    /// 1 − k_ij, row-major n×n.
    one_minus_kij: Vec<f64>,
}

/// Working space for [`PengRobinson::ln_phi`], reused between calls.
#[derive(Debug, Clone, Default)]
pub struct PrScratch {
    sqrt_a: Vec<f64>,
    b: Vec<f64>,
    sum_a: Vec<f64>,
}

/// The compressibility factor and which root was taken.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PrState {
    pub z: f64,
    /// More than one real root above B: the lower-Gibbs-energy root was taken.
    pub multiple_roots: bool,
}

impl PengRobinson {
    /// `kij`: optional row-major n×n interaction parameters (symmetric, zero diagonal).
    pub fn new(comps: Vec<PrComponent>, kij: Option<&[f64]>) -> Result<Self, PrError> {
        let n = comps.len();
        for (i, c) in comps.iter().enumerate() {
            if !(c.tc_k > 0.0
                && c.pc_bar > 0.0
                && c.omega.is_finite()
                && c.tc_k.is_finite()
                && c.pc_bar.is_finite())
            {
                return Err(PrError::BadComponent { index: i });
            }
        }
        let one_minus_kij = match kij {
            None => vec![1.0; n * n],
            Some(k) => {
                if k.len() != n * n {
                    return Err(PrError::BadKij { n });
                }
                for i in 0..n {
                    if k[i * n + i] != 0.0 {
                        return Err(PrError::BadKij { n });
                    }
                    for j in 0..n {
                        if !k[i * n + j].is_finite() || (k[i * n + j] - k[j * n + i]).abs() > 1e-15
                        {
                            return Err(PrError::BadKij { n });
                        }
                    }
                }
                k.iter().map(|x| 1.0 - x).collect()
            }
        };
        Ok(Self {
            comps,
            one_minus_kij,
        })
    }

    pub fn len(&self) -> usize {
        self.comps.len()
    }

    pub fn is_empty(&self) -> bool {
        self.comps.is_empty()
    }

    pub fn scratch(&self) -> PrScratch {
        let n = self.comps.len();
        PrScratch {
            sqrt_a: vec![0.0; n],
            b: vec![0.0; n],
            sum_a: vec![0.0; n],
        }
    }

    /// ln φ_i for mole fractions `y` (summing to 1) at `t_k`, `p_bar`; writes `ln_phi`.
    /// No allocation when `scratch` came from [`Self::scratch`].
    pub fn ln_phi(
        &self,
        t_k: f64,
        p_bar: f64,
        y: &[f64],
        ln_phi: &mut [f64],
        scratch: &mut PrScratch,
    ) -> Result<PrState, PrError> {
        let n = self.comps.len();
        debug_assert!(y.len() == n && ln_phi.len() == n);
        if scratch.b.len() != n {
            *scratch = self.scratch();
        }
        let rt = R_J_PER_MOL_K * t_k;
        let p_pa = p_bar * 1e5;
        for (i, c) in self.comps.iter().enumerate() {
            let tc = c.tc_k;
            let pc = c.pc_bar * 1e5;
            let kappa = 0.37464 + 1.54226 * c.omega - 0.26992 * c.omega * c.omega;
            let s = 1.0 + kappa * (1.0 - (t_k / tc).sqrt());
            let a = OMEGA_A * (R_J_PER_MOL_K * tc).powi(2) / pc * s * s;
            scratch.sqrt_a[i] = a.sqrt();
            scratch.b[i] = OMEGA_B * R_J_PER_MOL_K * tc / pc;
        }
        let mut a_mix = 0.0;
        let mut b_mix = 0.0;
        for i in 0..n {
            let row = &self.one_minus_kij[i * n..(i + 1) * n];
            let sum = scratch.sqrt_a[i]
                * y.iter()
                    .zip(&scratch.sqrt_a)
                    .zip(row)
                    .map(|((yj, saj), k)| yj * saj * k)
                    .sum::<f64>();
            scratch.sum_a[i] = sum;
            a_mix += y[i] * sum;
            b_mix += y[i] * scratch.b[i];
        }
        let big_a = a_mix * p_pa / (rt * rt);
        let big_b = b_mix * p_pa / rt;
        let (z, multiple_roots) =
            vapour_root(big_a, big_b).ok_or(PrError::NoRoot { t_k, p_bar })?;
        let log_term = ((z + (1.0 + SQRT2) * big_b) / (z + (1.0 - SQRT2) * big_b)).ln();
        let ln_z_b = (z - big_b).ln();
        let f = big_a / (2.0 * SQRT2 * big_b);
        for (i, lp) in ln_phi.iter_mut().enumerate() {
            let bi_b = scratch.b[i] / b_mix;
            *lp =
                bi_b * (z - 1.0) - ln_z_b - f * (2.0 * scratch.sum_a[i] / a_mix - bi_b) * log_term;
        }
        Ok(PrState { z, multiple_roots })
    }
}

/// Residual Gibbs energy G^R/(RT) of the mixture at root z (for root selection).
fn g_residual(z: f64, a: f64, b: f64) -> f64 {
    z - 1.0
        - (z - b).ln()
        - a / (2.0 * SQRT2 * b) * ((z + (1.0 + SQRT2) * b) / (z + (1.0 - SQRT2) * b)).ln()
}

/// Real roots of Z³ − (1−B) Z² + (A − 3B² − 2B) Z − (AB − B² − B³) = 0 above B;
/// returns the root of lower residual Gibbs energy and whether there was a choice.
fn vapour_root(a: f64, b: f64) -> Option<(f64, bool)> {
    let c2 = -(1.0 - b);
    let c1 = a - 3.0 * b * b - 2.0 * b;
    let c0 = -(a * b - b * b - b * b * b);
    let mut roots = [f64::NAN; 3];
    let n = cubic_real_roots(c2, c1, c0, &mut roots);
    let mut best: Option<(f64, f64)> = None;
    let mut count = 0;
    for &r in &roots[..n] {
        // Polish with Newton (the trigonometric form loses a few digits).
        let mut z = r;
        for _ in 0..3 {
            let f = ((z + c2) * z + c1) * z + c0;
            let d = (3.0 * z + 2.0 * c2) * z + c1;
            if d != 0.0 {
                z -= f / d;
            }
        }
        if z > b && z.is_finite() {
            count += 1;
            let g = g_residual(z, a, b);
            if best.is_none_or(|(_, gb)| g < gb) {
                best = Some((z, g));
            }
        }
    }
    best.map(|(z, _)| (z, count > 1))
}

/// Real roots of x³ + c2 x² + c1 x + c0 (Cardano / trigonometric); returns how many.
fn cubic_real_roots(c2: f64, c1: f64, c0: f64, out: &mut [f64; 3]) -> usize {
    let shift = c2 / 3.0;
    let p = c1 - c2 * c2 / 3.0;
    let q = 2.0 * c2 * c2 * c2 / 27.0 - c2 * c1 / 3.0 + c0;
    let disc = (q / 2.0).powi(2) + (p / 3.0).powi(3);
    if disc > 0.0 {
        let s = disc.sqrt();
        let u = (-q / 2.0 + s).cbrt();
        let v = (-q / 2.0 - s).cbrt();
        out[0] = u + v - shift;
        1
    } else if p == 0.0 {
        out[0] = -shift;
        1
    } else {
        let m = 2.0 * (-p / 3.0).sqrt();
        let arg = (3.0 * q / (p * m)).clamp(-1.0, 1.0);
        let theta = arg.acos() / 3.0;
        for (k, o) in out.iter_mut().enumerate() {
            *o = m * (theta - 2.0 * std::f64::consts::PI * k as f64 / 3.0).cos() - shift;
        }
        3
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn cubic_roots() {
        // (x−1)(x−2)(x−3) = x³ − 6x² + 11x − 6.
        let mut r = [0.0; 3];
        let n = cubic_real_roots(-6.0, 11.0, -6.0, &mut r);
        assert_eq!(n, 3);
        let mut s = r;
        s.sort_by(f64::total_cmp);
        for (a, b) in s.iter().zip([1.0, 2.0, 3.0]) {
            assert!((a - b).abs() < 1e-12);
        }
        // x³ + x − 2 = (x − 1)(x² + x + 2): one real root.
        assert_eq!(cubic_real_roots(0.0, 1.0, -2.0, &mut r), 1);
        assert!((r[0] - 1.0).abs() < 1e-12);
    }

    #[test]
    fn pure_component_limit_is_ideal_at_low_pressure() {
        // φ → 1 and Z → 1 as P → 0 (definition of the fugacity coefficient).
        let pr = PengRobinson::new(
            vec![PrComponent {
                tc_k: 126.2,
                pc_bar: 33.98,
                omega: 0.037,
            }],
            None,
        )
        .unwrap();
        let mut lp = [0.0];
        let st = pr
            .ln_phi(300.0, 1e-6, &[1.0], &mut lp, &mut pr.scratch())
            .unwrap();
        assert!((st.z - 1.0).abs() < 1e-8 && lp[0].abs() < 1e-8);
    }

    #[test]
    fn ln_phi_is_consistent_with_residual_gibbs() {
        // Σ y_i ln φ_i = G^R/(RT) of the mixture (Gibbs–Duhem consistency of the PR expressions).
        let comps = vec![
            PrComponent {
                tc_k: 33.19,
                pc_bar: 13.13,
                omega: -0.216,
            },
            PrComponent {
                tc_k: 126.2,
                pc_bar: 33.98,
                omega: 0.037,
            },
            PrComponent {
                tc_k: 405.4,
                pc_bar: 113.33,
                omega: 0.257,
            },
        ];
        let pr = PengRobinson::new(
            comps,
            Some(&[0.0, 0.1, 0.0, 0.1, 0.0, 0.05, 0.0, 0.05, 0.0]),
        )
        .unwrap();
        let y = [0.6, 0.25, 0.15];
        let mut lp = [0.0; 3];
        let (t, p) = (700.0, 200.0);
        let st = pr.ln_phi(t, p, &y, &mut lp, &mut pr.scratch()).unwrap();
        let mix: f64 = y.iter().zip(&lp).map(|(a, b)| a * b).sum();
        // Recompute A, B for the mixture to get G^R.
        let rt = R_J_PER_MOL_K * t;
        let mut sa = [0.0; 3];
        let mut bb = [0.0; 3];
        for (i, c) in pr.comps.iter().enumerate() {
            let kappa = 0.37464 + 1.54226 * c.omega - 0.26992 * c.omega * c.omega;
            let s = 1.0 + kappa * (1.0 - (t / c.tc_k).sqrt());
            sa[i] = (OMEGA_A * (R_J_PER_MOL_K * c.tc_k).powi(2) / (c.pc_bar * 1e5)).sqrt() * s;
            bb[i] = OMEGA_B * R_J_PER_MOL_K * c.tc_k / (c.pc_bar * 1e5);
        }
        let mut am = 0.0;
        for i in 0..3 {
            for j in 0..3 {
                am += y[i] * y[j] * sa[i] * sa[j] * pr.one_minus_kij[i * 3 + j];
            }
        }
        let bm: f64 = y.iter().zip(&bb).map(|(a, b)| a * b).sum();
        let g = g_residual(st.z, am * p * 1e5 / (rt * rt), bm * p * 1e5 / rt);
        assert!((mix - g).abs() < 1e-12, "{mix} vs {g}");
        // And ln φ_i = ∂(n G^R/RT)/∂n_i: central difference in mole numbers.
        let h = 1e-6;
        for k in 0..3 {
            let g_of = |dk: f64| {
                let mut n = y;
                n[k] += dk;
                let tot: f64 = n.iter().sum();
                let yy = [n[0] / tot, n[1] / tot, n[2] / tot];
                let mut l = [0.0; 3];
                pr.ln_phi(t, p, &yy, &mut l, &mut pr.scratch()).unwrap();
                tot * yy.iter().zip(&l).map(|(a, b)| a * b).sum::<f64>()
            };
            let d = (g_of(h) - g_of(-h)) / (2.0 * h);
            assert!((d - lp[k]).abs() < 1e-7, "component {k}: {d} vs {}", lp[k]);
        }
    }

    #[test]
    fn refuses_bad_kij() {
        let c = PrComponent {
            tc_k: 100.0,
            pc_bar: 10.0,
            omega: 0.0,
        };
        assert!(PengRobinson::new(vec![c, c], Some(&[0.0, 0.1, 0.2, 0.0])).is_err());
        assert!(PengRobinson::new(vec![c, c], Some(&[0.0, 0.1])).is_err());
    }
}
