//! Small numerical tools shared by the core: bracketed root finding with an
//! iteration cap, and finite-value checks.

/// Why a root search failed.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum RootError {
    /// The function has the same sign at both ends of the bracket.
    NotBracketed {
        /// Lower end of the bracket.
        lo: f64,
        /// Upper end of the bracket.
        hi: f64,
    },
    /// The function returned a non-finite value at `x`.
    NonFinite {
        /// Where the function was evaluated.
        x: f64,
    },
    /// The iteration cap was reached before the tolerance.
    NoConvergence {
        /// Iterations spent.
        iterations: u32,
        /// Width of the last bracket.
        width: f64,
    },
}

/// Result of a successful root search.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Root {
    /// The root.
    pub x: f64,
    /// Iterations spent.
    pub iterations: u32,
}

/// Hard cap on root-finding iterations. Bisection alone halves the bracket
/// each step, so 200 steps take any f64 bracket to adjacent floats.
pub const ROOT_MAX_ITERATIONS: u32 = 200;

/// Find `x` in `[lo, hi]` with `f(x) = 0` by the Illinois variant of
/// regula falsi, safeguarded by bisection, to `|hi - lo| <= x_tol` or
/// `|f| <= f_tol`. The bracket must change sign. Deterministic: the same
/// inputs take the same steps.
///
/// # Errors
/// [`RootError`] when the bracket does not change sign, `f` is not finite,
/// or the cap is hit.
pub fn bracketed_root<F: FnMut(f64) -> f64>(
    mut f: F,
    lo: f64,
    hi: f64,
    x_tol: f64,
    f_tol: f64,
) -> Result<Root, RootError> {
    let (mut a, mut b) = if lo <= hi { (lo, hi) } else { (hi, lo) };
    let mut fa = f(a);
    if !fa.is_finite() {
        return Err(RootError::NonFinite { x: a });
    }
    let mut fb = f(b);
    if !fb.is_finite() {
        return Err(RootError::NonFinite { x: b });
    }
    if fa == 0.0 {
        return Ok(Root {
            x: a,
            iterations: 0,
        });
    }
    if fb == 0.0 {
        return Ok(Root {
            x: b,
            iterations: 0,
        });
    }
    if (fa > 0.0) == (fb > 0.0) {
        return Err(RootError::NotBracketed { lo: a, hi: b });
    }
    // side: which end was kept last time (for the Illinois halving).
    let mut side: i8 = 0;
    for it in 1..=ROOT_MAX_ITERATIONS {
        let width = b - a;
        // Regula falsi point, falling back to bisection when it would leave
        // the bracket or every third step (guaranteed shrinkage).
        let mut x = (a * fb - b * fa) / (fb - fa);
        if !(x > a && x < b) || it % 3 == 0 {
            x = 0.5 * (a + b);
        }
        let fx = f(x);
        if !fx.is_finite() {
            return Err(RootError::NonFinite { x });
        }
        if fx == 0.0 || libm::fabs(fx) <= f_tol || width <= x_tol {
            return Ok(Root { x, iterations: it });
        }
        if (fx > 0.0) == (fb > 0.0) {
            b = x;
            fb = fx;
            if side == -1 {
                fa *= 0.5;
            }
            side = -1;
        } else {
            a = x;
            fa = fx;
            if side == 1 {
                fb *= 0.5;
            }
            side = 1;
        }
    }
    Err(RootError::NoConvergence {
        iterations: ROOT_MAX_ITERATIONS,
        width: b - a,
    })
}

/// True when every value is finite.
#[must_use]
pub fn all_finite(vs: &[f64]) -> bool {
    vs.iter().all(|v| v.is_finite())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn finds_sqrt2() {
        let r = bracketed_root(|x| x * x - 2.0, 0.0, 2.0, 1e-15, 0.0).unwrap();
        assert!((r.x - core::f64::consts::SQRT_2).abs() < 1e-14);
        assert!(r.iterations < 100);
    }

    #[test]
    fn rejects_unbracketed() {
        let e = bracketed_root(|x| x * x + 1.0, -1.0, 1.0, 1e-12, 0.0).unwrap_err();
        assert!(matches!(e, RootError::NotBracketed { .. }));
    }

    #[test]
    fn reports_non_finite() {
        let e = bracketed_root(|x| 1.0 / x - 1.0, 0.0, 2.0, 1e-12, 0.0).unwrap_err();
        assert!(matches!(e, RootError::NonFinite { .. }));
    }
}
