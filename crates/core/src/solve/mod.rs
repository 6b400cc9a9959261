//! Numerical solvers for the core: a bracketed scalar root finder (Brent) and a
//! safeguarded Newton on a bracket. Outcomes, never panics: "did not converge" is a
//! value the caller reports.
//!
//! # References
//! - R. P. Brent, Algorithms for Minimization without Derivatives (1973), ch. 4.
//! - W. H. Press et al., Numerical Recipes, 3rd ed. (2007), §9.3 and §9.4 (rtsafe).

/// Result of a scalar root search.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum RootOutcome {
    Converged {
        x: f64,
        iterations: u32,
    },
    /// f(a) and f(b) have the same sign: no root is bracketed.
    NotBracketed {
        f_lo: f64,
        f_hi: f64,
    },
    /// The iteration budget ran out; `x` is the best estimate.
    NotConverged {
        x: f64,
        iterations: u32,
    },
    /// f returned NaN.
    NotFinite {
        x: f64,
    },
}

/// Brent's method on `[a, b]`; stops when the bracket is below `x_tol`.
pub fn brent(
    mut f: impl FnMut(f64) -> f64,
    a: f64,
    b: f64,
    x_tol: f64,
    max_iter: u32,
) -> RootOutcome {
    let (mut a, mut b) = (a, b);
    let mut fa = f(a);
    let mut fb = f(b);
    if fa.is_nan() {
        return RootOutcome::NotFinite { x: a };
    }
    if fb.is_nan() {
        return RootOutcome::NotFinite { x: b };
    }
    if fa == 0.0 {
        return RootOutcome::Converged {
            x: a,
            iterations: 0,
        };
    }
    if fb == 0.0 {
        return RootOutcome::Converged {
            x: b,
            iterations: 0,
        };
    }
    if fa.signum() == fb.signum() {
        return RootOutcome::NotBracketed { f_lo: fa, f_hi: fb };
    }
    let (mut c, mut fc) = (a, fa);
    let mut d = b - a;
    let mut e = d;
    for it in 1..=max_iter {
        if fb.signum() == fc.signum() {
            c = a;
            fc = fa;
            d = b - a;
            e = d;
        }
        if fc.abs() < fb.abs() {
            a = b;
            b = c;
            c = a;
            fa = fb;
            fb = fc;
            fc = fa;
        }
        let tol = 2.0 * f64::EPSILON * b.abs() + 0.5 * x_tol;
        let m = 0.5 * (c - b);
        if m.abs() <= tol || fb == 0.0 {
            return RootOutcome::Converged {
                x: b,
                iterations: it,
            };
        }
        if e.abs() >= tol && fa.abs() > fb.abs() {
            let s = fb / fa;
            let (mut p, mut q);
            if a == c {
                p = 2.0 * m * s;
                q = 1.0 - s;
            } else {
                let qq = fa / fc;
                let r = fb / fc;
                p = s * (2.0 * m * qq * (qq - r) - (b - a) * (r - 1.0));
                q = (qq - 1.0) * (r - 1.0) * (s - 1.0);
            }
            if p > 0.0 {
                q = -q;
            } else {
                p = -p;
            }
            if 2.0 * p < (3.0 * m * q - (tol * q).abs()).min((e * q).abs()) {
                e = d;
                d = p / q;
            } else {
                d = m;
                e = d;
            }
        } else {
            d = m;
            e = d;
        }
        a = b;
        fa = fb;
        b += if d.abs() > tol { d } else { tol.copysign(m) };
        fb = f(b);
        if fb.is_nan() {
            return RootOutcome::NotFinite { x: b };
        }
    }
    RootOutcome::NotConverged {
        x: b,
        iterations: max_iter,
    }
}

/// Newton with bisection safeguard on a bracket `[lo, hi]` where `fdf` returns
/// (f, f'). Starts at `x0` (clamped into the bracket). Converges when |Δx| ≤ `x_tol`.
pub fn newton_bracketed(
    mut fdf: impl FnMut(f64) -> (f64, f64),
    lo: f64,
    hi: f64,
    x0: f64,
    x_tol: f64,
    max_iter: u32,
) -> RootOutcome {
    let (f_lo, _) = fdf(lo);
    let (f_hi, _) = fdf(hi);
    if f_lo.is_nan() || f_hi.is_nan() {
        return RootOutcome::NotFinite {
            x: if f_lo.is_nan() { lo } else { hi },
        };
    }
    if f_lo == 0.0 {
        return RootOutcome::Converged {
            x: lo,
            iterations: 0,
        };
    }
    if f_hi == 0.0 {
        return RootOutcome::Converged {
            x: hi,
            iterations: 0,
        };
    }
    if f_lo.signum() == f_hi.signum() {
        return RootOutcome::NotBracketed { f_lo, f_hi };
    }
    // Orient so that f(neg) < 0 < f(pos).
    let (mut neg, mut pos) = if f_lo < 0.0 { (lo, hi) } else { (hi, lo) };
    let mut x = x0.clamp(lo.min(hi), lo.max(hi));
    for it in 1..=max_iter {
        let (f, df) = fdf(x);
        if f.is_nan() {
            return RootOutcome::NotFinite { x };
        }
        if f == 0.0 {
            return RootOutcome::Converged { x, iterations: it };
        }
        if f < 0.0 {
            neg = x;
        } else {
            pos = x;
        }
        let mut next = x - f / df;
        let (a, b) = (neg.min(pos), neg.max(pos));
        if !(next > a && next < b && next.is_finite()) {
            next = 0.5 * (neg + pos);
        }
        if (next - x).abs() <= x_tol {
            return RootOutcome::Converged {
                x: next,
                iterations: it,
            };
        }
        x = next;
    }
    RootOutcome::NotConverged {
        x,
        iterations: max_iter,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn brent_finds_known_roots() {
        // cos x = x at 0.739085133215160641655 (the Dottie number; Abramowitz & Stegun 4.3).
        match brent(|x| x.cos() - x, 0.0, 1.0, 1e-15, 100) {
            RootOutcome::Converged { x, .. } => {
                assert!((x - 0.739_085_133_215_160_6).abs() < 1e-14)
            }
            o => panic!("{o:?}"),
        }
        assert!(matches!(
            brent(|x| x * x + 1.0, -1.0, 1.0, 1e-12, 50),
            RootOutcome::NotBracketed { .. }
        ));
        assert!(matches!(
            brent(|_| f64::NAN, -1.0, 1.0, 1e-12, 50),
            RootOutcome::NotFinite { .. }
        ));
    }

    #[test]
    fn newton_safeguarded() {
        // x³ − 2x − 5 = 0 at 2.0945514815423265 (Newton's own example; Whittaker & Robinson 1924).
        match newton_bracketed(
            |x| (x * x * x - 2.0 * x - 5.0, 3.0 * x * x - 2.0),
            0.0,
            5.0,
            0.0,
            1e-14,
            100,
        ) {
            RootOutcome::Converged { x, .. } => {
                assert!((x - 2.094_551_481_542_326_5).abs() < 1e-13)
            }
            o => panic!("{o:?}"),
        }
        // A flat derivative does not throw the iterate out of the bracket.
        match newton_bracketed(|x| (x.powi(3), 3.0 * x * x), -1.0, 2.0, 0.0, 1e-10, 200) {
            RootOutcome::Converged { x, .. } => assert!(x.abs() < 1e-3),
            o => panic!("{o:?}"),
        }
    }
}
