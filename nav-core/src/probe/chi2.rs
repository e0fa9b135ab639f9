//! Chi-square quantiles for the port-consistency test.
//!
//! The upper-tail probability of a chi-square variable with `k` degrees of
//! freedom is `Q(k/2, x/2)`, the regularised upper incomplete gamma
//! function. `Q` is evaluated by the power series of Abramowitz and Stegun,
//! *Handbook of Mathematical Functions* (1964), eq. 6.5.29, for
//! `x < a + 1`, and otherwise by the continued fraction of eq. 6.5.31 in
//! the even form evaluated with the modified Lentz method (Press, Teukolsky,
//! Vetterling and Flannery, *Numerical Recipes*, section 6.2). The quantile
//! is found by [`crate::num::bracketed_root`] on `ln Q(x) - ln p`, which
//! keeps full relative accuracy for small false-alarm probabilities. Both
//! loops have iteration caps.

use crate::num::{RootError, bracketed_root};

/// Why a chi-square computation failed.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Chi2Error {
    /// Degrees of freedom must be at least 1.
    DegreesOfFreedom {
        /// The value given.
        dof: u32,
    },
    /// The tail probability must lie in (0, 1).
    Probability {
        /// The value given.
        p: f64,
    },
    /// The shape or argument of the incomplete gamma function is out of range.
    Argument {
        /// Shape `a` (> 0).
        a: f64,
        /// Argument `x` (>= 0).
        x: f64,
    },
    /// A series or continued fraction hit its term cap.
    NoConvergence,
    /// The quantile search failed.
    Root(RootError),
}

impl From<RootError> for Chi2Error {
    fn from(e: RootError) -> Self {
        Self::Root(e)
    }
}

/// Term cap of the series and the continued fraction.
pub const GAMMA_MAX_TERMS: u32 = 1000;
const EPS: f64 = 1e-16;
const TINY: f64 = 1e-300;

/// `ln Q(a, x)` and `P(a, x)`.
fn ln_q_and_p(a: f64, x: f64) -> Result<(f64, f64), Chi2Error> {
    if !(a.is_finite() && a > 0.0 && x.is_finite() && x >= 0.0) {
        return Err(Chi2Error::Argument { a, x });
    }
    if x == 0.0 {
        return Ok((0.0, 0.0));
    }
    let ln_pre = a * libm::log(x) - x - libm::lgamma(a);
    if x < a + 1.0 {
        // A&S 6.5.29: P = x^a e^-x / Gamma(a+1) * sum x^n / ((a+1)...(a+n)).
        let mut ap = a;
        let mut term = 1.0 / a;
        let mut sum = term;
        for _ in 0..GAMMA_MAX_TERMS {
            ap += 1.0;
            term *= x / ap;
            sum += term;
            if libm::fabs(term) < libm::fabs(sum) * EPS {
                let p = sum * libm::exp(ln_pre);
                return Ok((libm::log1p(-p), p));
            }
        }
        Err(Chi2Error::NoConvergence)
    } else {
        // A&S 6.5.31, even contraction, modified Lentz.
        let mut b = x + 1.0 - a;
        let mut c = 1.0 / TINY;
        let mut d = 1.0 / b;
        let mut h = d;
        let mut i = 1.0;
        for _ in 0..GAMMA_MAX_TERMS {
            let an = -i * (i - a);
            b += 2.0;
            d = an * d + b;
            if libm::fabs(d) < TINY {
                d = TINY;
            }
            c = b + an / c;
            if libm::fabs(c) < TINY {
                c = TINY;
            }
            d = 1.0 / d;
            let del = d * c;
            h *= del;
            if libm::fabs(del - 1.0) < EPS {
                let ln_q = ln_pre + libm::log(h);
                return Ok((ln_q, -libm::expm1(ln_q)));
            }
            i += 1.0;
        }
        Err(Chi2Error::NoConvergence)
    }
}

/// Regularised lower incomplete gamma function `P(a, x)`.
///
/// # Errors
/// [`Chi2Error::Argument`] unless `a > 0`, `x >= 0`, both finite;
/// [`Chi2Error::NoConvergence`] at the term cap.
pub fn regularized_gamma_p(a: f64, x: f64) -> Result<f64, Chi2Error> {
    Ok(ln_q_and_p(a, x)?.1)
}

/// Upper-tail probability of a chi-square variable with `dof` degrees of
/// freedom: `Pr(X > x) = Q(dof/2, x/2)`.
///
/// # Errors
/// As [`regularized_gamma_p`]; [`Chi2Error::DegreesOfFreedom`] for 0.
pub fn chi_square_upper_tail(dof: u32, x: f64) -> Result<f64, Chi2Error> {
    if dof == 0 {
        return Err(Chi2Error::DegreesOfFreedom { dof });
    }
    Ok(libm::exp(ln_q_and_p(0.5 * f64::from(dof), 0.5 * x)?.0))
}

/// The `x` with `Pr(X > x) = upper_tail` for a chi-square variable with
/// `dof` degrees of freedom (the test threshold for false-alarm
/// probability `upper_tail`).
///
/// # Errors
/// [`Chi2Error::DegreesOfFreedom`] for 0; [`Chi2Error::Probability`] unless
/// `0 < upper_tail < 1`; [`Chi2Error::Root`] if the search fails.
pub fn chi_square_quantile_upper(dof: u32, upper_tail: f64) -> Result<f64, Chi2Error> {
    if dof == 0 {
        return Err(Chi2Error::DegreesOfFreedom { dof });
    }
    if !(upper_tail > 0.0 && upper_tail < 1.0) {
        return Err(Chi2Error::Probability { p: upper_tail });
    }
    let a = 0.5 * f64::from(dof);
    let target = libm::log(upper_tail);
    let f = |x: f64| match ln_q_and_p(a, 0.5 * x) {
        Ok((ln_q, _)) => ln_q - target,
        Err(_) => f64::NAN,
    };
    // Grow the bracket until the tail is below the target (Q falls at least
    // like e^{-x/2} x^{a-1}, so a few doublings always suffice).
    let mut hi = 2.0 * f64::from(dof) + 10.0;
    let mut grown = 0;
    while f(hi) > 0.0 && grown < 64 {
        hi *= 2.0;
        grown += 1;
    }
    let root = bracketed_root(f, 0.0, hi, 1e-13 * hi, 1e-15)?;
    Ok(root.x)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Upper-tail critical values of the chi-square distribution, NIST/
    /// SEMATECH e-Handbook of Statistical Methods, section 1.3.6.7.4
    /// ("Critical Values of the Chi-Square Distribution"), three decimals as
    /// printed. Values recalled from that table; the reference-library check
    /// against scipy.stats.chi2 is in tests/tests/probe_reference.rs.
    #[test]
    fn nist_critical_values() {
        let rows = [
            (1, 0.05, 3.841),
            (1, 0.01, 6.635),
            (1, 0.001, 10.828),
            (2, 0.05, 5.991),
            (2, 0.01, 9.210),
            (2, 0.001, 13.816),
            (3, 0.05, 7.815),
            (3, 0.01, 11.345),
            (3, 0.001, 16.266),
            (5, 0.05, 11.070),
        ];
        for (dof, p, x) in rows {
            let q = chi_square_quantile_upper(dof, p).unwrap();
            assert!(
                (q - x).abs() <= 0.0005 + 1e-12,
                "dof {dof} p {p}: {q} vs {x}"
            );
        }
    }

    /// Closed forms: with 2 dof, Q = exp(-x/2), so the quantile is
    /// -2 ln p exactly; with a = 1, P(1, x) = 1 - e^-x.
    #[test]
    fn closed_forms() {
        for p in [0.3, 1e-3, 1e-6, 1e-12] {
            let q = chi_square_quantile_upper(2, p).unwrap();
            assert!((q / (-2.0 * libm::log(p)) - 1.0).abs() < 1e-12, "p {p}");
        }
        for x in [0.01, 0.5, 1.5, 7.0, 30.0] {
            let p = regularized_gamma_p(1.0, x).unwrap();
            assert!((p - (1.0 - libm::exp(-x))).abs() < 1e-14, "x {x}");
        }
        // dof 1: Q(1/2, x/2) = erfc(sqrt(x/2)).
        for x in [0.2, 2.0, 9.0, 40.0] {
            let t = chi_square_upper_tail(1, x).unwrap();
            let e = libm::erfc(libm::sqrt(0.5 * x));
            assert!((t / e - 1.0).abs() < 1e-12, "x {x}: {t} vs {e}");
        }
    }

    #[test]
    fn bad_arguments() {
        assert!(matches!(
            chi_square_quantile_upper(0, 0.1),
            Err(Chi2Error::DegreesOfFreedom { .. })
        ));
        assert!(matches!(
            chi_square_quantile_upper(2, 0.0),
            Err(Chi2Error::Probability { .. })
        ));
        assert!(matches!(
            regularized_gamma_p(-1.0, 1.0),
            Err(Chi2Error::Argument { .. })
        ));
    }
}
