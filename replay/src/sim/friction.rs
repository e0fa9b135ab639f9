//! Darcy friction factor: Hagen–Poiseuille `f = 64/Re` in laminar flow,
//! Colebrook–White in turbulent flow, and a linear bridge between.
//!
//! - Laminar (`Re <= 2300`): `f = 64/Re`, the Hagen–Poiseuille result
//!   written as a Darcy factor (any fluid mechanics text, e.g. White,
//!   *Fluid Mechanics*, section on laminar pipe flow).
//! - Turbulent (`Re >= 4000`): Colebrook–White (Colebrook 1939),
//!   `1/sqrt(f) = -2 log10(eps/(3.7 D) + 2.51/(Re sqrt(f)))`, solved by
//!   Newton's method on `x = 1/sqrt(f)` from the Swamee–Jain (1976)
//!   explicit estimate, with an iteration cap.
//! - Between: no law predicts the transitional regime; `f` is interpolated
//!   linearly in `Re` between the laminar value at 2300 and the Colebrook
//!   value at 4000, so the loss stays continuous for the Newton solver
//!   (common practice).

/// Upper Reynolds number of the laminar law.
pub const RE_LAMINAR_MAX: f64 = 2300.0;
/// Lower Reynolds number of the Colebrook law.
pub const RE_TURBULENT_MIN: f64 = 4000.0;
/// Iteration cap of the Colebrook solve.
pub const COLEBROOK_MAX_ITERATIONS: u32 = 50;

const LN10: f64 = core::f64::consts::LN_10;

/// Flow regime of a friction evaluation.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Regime {
    /// `Re <= 2300`.
    Laminar,
    /// `2300 < Re < 4000`.
    Transitional,
    /// `Re >= 4000`.
    Turbulent,
}

/// Why a friction factor could not be computed.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum FrictionError {
    /// Reynolds number not finite or not positive.
    BadReynolds {
        /// The value given.
        reynolds: f64,
    },
    /// Relative roughness not finite or negative.
    BadRoughness {
        /// The value given.
        relative_roughness: f64,
    },
    /// Newton did not settle within [`COLEBROOK_MAX_ITERATIONS`].
    NoConvergence {
        /// Reynolds number.
        reynolds: f64,
        /// Relative roughness.
        relative_roughness: f64,
    },
}

impl core::fmt::Display for FrictionError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match self {
            Self::BadReynolds { reynolds } => {
                write!(f, "Reynolds number {reynolds} is not positive")
            }
            Self::BadRoughness { relative_roughness } => {
                write!(
                    f,
                    "relative roughness {relative_roughness} is negative or not finite"
                )
            }
            Self::NoConvergence {
                reynolds,
                relative_roughness,
            } => write!(
                f,
                "Colebrook did not converge at Re = {reynolds}, eps/D = {relative_roughness}"
            ),
        }
    }
}

impl std::error::Error for FrictionError {}

/// Colebrook–White friction factor and its derivative `df/dRe`.
///
/// # Errors
/// [`FrictionError`] for bad input or no convergence.
pub fn colebrook(reynolds: f64, relative_roughness: f64) -> Result<(f64, f64), FrictionError> {
    if !(reynolds.is_finite() && reynolds > 0.0) {
        return Err(FrictionError::BadReynolds { reynolds });
    }
    if !(relative_roughness.is_finite() && relative_roughness >= 0.0) {
        return Err(FrictionError::BadRoughness { relative_roughness });
    }
    let a = relative_roughness / 3.7;
    let b = 2.51 / reynolds;
    // Swamee–Jain start: f = 0.25 / log10(eps/3.7D + 5.74/Re^0.9)^2.
    let sj = libm::log10(a + 5.74 / libm::pow(reynolds, 0.9));
    let mut x = if sj.is_finite() && sj < 0.0 {
        -2.0 * sj
    } else {
        8.0
    };
    let mut converged = false;
    for _ in 0..COLEBROOK_MAX_ITERATIONS {
        let g = a + b * x;
        let fx = x + 2.0 * libm::log10(g);
        let dfx = 1.0 + 2.0 / LN10 * b / g;
        let step = fx / dfx;
        x -= step;
        if !x.is_finite() || x <= 0.0 {
            return Err(FrictionError::NoConvergence {
                reynolds,
                relative_roughness,
            });
        }
        if step.abs() <= 1e-15 * x {
            converged = true;
            break;
        }
    }
    if !converged {
        return Err(FrictionError::NoConvergence {
            reynolds,
            relative_roughness,
        });
    }
    let f = 1.0 / (x * x);
    // Implicit derivative: with g = a + 2.51 x / Re,
    // dx/dRe (1 + 2*2.51/(ln10 Re g)) = 2*2.51 x / (ln10 Re^2 g).
    let g = a + b * x;
    let dx = (2.0 * 2.51 * x / (LN10 * reynolds * reynolds * g))
        / (1.0 + 2.0 * 2.51 / (LN10 * reynolds * g));
    Ok((f, -2.0 / (x * x * x) * dx))
}

/// Darcy friction factor in any regime, with `df/dRe` and the regime.
///
/// # Errors
/// [`FrictionError`] for bad input or a failed Colebrook solve.
pub fn darcy(reynolds: f64, relative_roughness: f64) -> Result<(f64, f64, Regime), FrictionError> {
    if !(reynolds.is_finite() && reynolds > 0.0) {
        return Err(FrictionError::BadReynolds { reynolds });
    }
    if reynolds <= RE_LAMINAR_MAX {
        return Ok((
            64.0 / reynolds,
            -64.0 / (reynolds * reynolds),
            Regime::Laminar,
        ));
    }
    if reynolds >= RE_TURBULENT_MIN {
        let (f, d) = colebrook(reynolds, relative_roughness)?;
        return Ok((f, d, Regime::Turbulent));
    }
    let f_lo = 64.0 / RE_LAMINAR_MAX;
    let (f_hi, _) = colebrook(RE_TURBULENT_MIN, relative_roughness)?;
    let slope = (f_hi - f_lo) / (RE_TURBULENT_MIN - RE_LAMINAR_MAX);
    Ok((
        f_lo + slope * (reynolds - RE_LAMINAR_MAX),
        slope,
        Regime::Transitional,
    ))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn colebrook_satisfies_its_equation_and_derivative() {
        for &(re, e) in &[(4e3, 0.0), (1e5, 1e-4), (1e7, 1e-2), (5e4, 0.05)] {
            let (f, d) = colebrook(re, e).unwrap();
            let lhs = 1.0 / libm::sqrt(f);
            let rhs = -2.0 * libm::log10(e / 3.7 + 2.51 / (re * libm::sqrt(f)));
            assert!((lhs - rhs).abs() < 1e-12 * lhs);
            let h = re * 1e-6;
            let num =
                (colebrook(re + h, e).unwrap().0 - colebrook(re - h, e).unwrap().0) / (2.0 * h);
            assert!((d - num).abs() <= 1e-5 * num.abs(), "{d} vs {num}");
        }
    }

    #[test]
    fn regimes_join_continuously() {
        let (fl, _, r1) = darcy(RE_LAMINAR_MAX, 1e-3).unwrap();
        let (fb, _, r2) = darcy(RE_LAMINAR_MAX + 1e-9, 1e-3).unwrap();
        assert_eq!(r1, Regime::Laminar);
        assert_eq!(r2, Regime::Transitional);
        assert!((fl - fb).abs() < 1e-9);
        let (ft, _, _) = darcy(RE_TURBULENT_MIN - 1e-9, 1e-3).unwrap();
        let (fc, _, r3) = darcy(RE_TURBULENT_MIN, 1e-3).unwrap();
        assert_eq!(r3, Regime::Turbulent);
        assert!((ft - fc).abs() < 1e-9);
        assert!(darcy(0.0, 0.0).is_err());
        assert!(colebrook(1e5, -1.0).is_err());
    }
}
