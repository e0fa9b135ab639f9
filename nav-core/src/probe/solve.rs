//! Inversion: port pressures to flow direction, static and dynamic
//! pressure, Mach number and speed, with a covariance and a port-fault
//! test.
//!
//! # Method
//! Unknowns: the direction the flow comes from, `d = -v_hat` (a unit
//! vector: two degrees of freedom, stepped in its tangent plane and
//! renormalised), the static pressure `p_s` and the regime's pressure
//! amplitude `A` (see [`super::model`]). With port weights
//! `w_i = 1/sigma_i^2` the solver minimises the chi-square
//! `F = sum_i w_i (y_i - p_s - A S(n_i . d))^2`, `y_i` the reading minus
//! the port bias, by Levenberg-Marquardt (Levenberg 1944, Marquardt 1963)
//! with Marquardt's diagonal scaling and Nielsen's damping update (Nielsen,
//! "Damping parameter in Marquardt's method", IMM DTU report, 1999). The
//! Jacobian is analytic; everything is fixed-size nalgebra (`Matrix4`,
//! `Vector4`), no heap. For Gaussian port noise this least-squares minimum
//! is the maximum-likelihood estimate.
//!
//! - Start (deterministic): the pressure-weighted mean of the port normals,
//!   weights `(y_i - min y)^2`, so the highest-pressure ports (the windward
//!   sector) dominate; on layouts that determine it (6 or more ports, all
//!   used) this is refined by the quadratic form of the pressures (both
//!   shapes are `a + b (n . d)^2` while the ports are windward, so `d` is
//!   the form's dominant eigenvector). If the fit from the refined start
//!   fails the port test or does not converge, the plain weighted mean is
//!   tried too and the better fit kept. `p_s` and `A` follow in closed form
//!   (they enter linearly). A caller may pass its own start
//!   ([`SolveOptions::start`]), e.g. the previous frame's direction.
//! - Stop: when the Gauss-Newton step would lower the chi-square by less
//!   than [`SolverConfig::tolerance`] (the step is far inside the noise),
//!   or at [`SolverConfig::max_iterations`], or when damping runs away;
//!   [`Convergence`] says which.
//! - Covariance: `(J^T W J)^{-1}` at the solution, with `W` from the
//!   configured port sigmas (not rescaled by the residual: the chi-square
//!   test checks that the sigmas fit), except after a fault that could not
//!   be isolated, when it is multiplied by the reduced chi-square
//!   `chi2 / dof` (the residuals show the sigmas are too small). Delta-method sigmas for Mach, `q`
//!   and speed.
//! - Regime ([`RegimeChoice::Auto`]): fit with the sphere shape. When its
//!   isentropic Mach exceeds `subsonic_up_to_mach` (0.6 by default, about
//!   the sphere's critical Mach number, beyond which the subsonic model is
//!   not valid anyway), also fit the Newtonian shape, and take the flow as
//!   supersonic when that fit's ratio `(p_s + A)/p_s` is at least the sonic
//!   isentropic `p0/p` and its chi-square is not worse by one or more.
//!   Otherwise the regime is [`Regime::Incompressible`] when the isentropic
//!   Mach is below `incompressible_below_mach` (0.3 by default, common
//!   practice), else [`Regime::CompressibleSubsonic`]. Both subsonic
//!   regimes share the shape, so the fit is the same; they differ in how
//!   `A` maps to `q` and Mach (`A = q`, or `A = p0 - p_s`).
//!
//!   A limit of the physics, not of the solver: while every port is
//!   windward (`cos theta > 0`) the two shapes are affinely related,
//!   `S_sphere = -5/4 + 9/4 S_newton`, so the port pressures of a subsonic
//!   flow at Mach `M_sub` (about 0.59 to 0.95 for air) are exactly those
//!   of a supersonic flow with a different static pressure. Only ports in
//!   the Newtonian shadow, or outside knowledge of the static pressure,
//!   can tell them apart; [`FlowSolution::regime_ambiguous`] says when the
//!   two fits were indistinguishable (chi-squares within one).
//! - Port faults: with `k` ports used and `k - 4 >= 1`, the chi-square is
//!   compared with the upper quantile of the chi-square law with `k - 4`
//!   degrees of freedom at [`SolverConfig::false_alarm_probability`]. A
//!   failed test with `k - 5 >= 1` (7-port heads) re-solves leaving each
//!   port out; the leave-one-out fit with the lowest chi-square names the
//!   port when it passes its own test (`k - 5` dof) and every other
//!   leave-one-out fit fails or is worse by at least the 1-dof threshold
//!   (a likelihood ratio above `exp(threshold/2)`); the re-solve is then
//!   the answer.
//!   Otherwise (a 5-port head has `k - 5 = 0`: every leave-one-out fit is
//!   exact, so no port can be singled out) the report is
//!   [`FaultReport::DetectedNotIsolated`].
//! - Direction validity: the direction is withheld
//!   ([`Direction::Invalid`]) when the amplitude is below
//!   `low_flow_multiple` times the port noise floor (rms sigma), when the
//!   fit did not converge, when the information matrix is singular, or
//!   when the direction lies outside the usable cone about +x (flow from
//!   the side or behind). With the attached (even) sphere shape the
//!   pressures of `d` and `-d` are identical; the solver reports the
//!   windward one (`d . x >= 0`), see [`super::model`] on the wake.

//!
//! # Limits worth knowing
//! - A fault is visible only through the part of its error that the four
//!   unknowns cannot absorb. Near head-on flow the ring ports all see one
//!   shape value, so the tip port's column of the model and the pair
//!   `(p_s, A)` span the same space: a tip-port offset then moves `q` and
//!   `p_s` and leaves no residual. On a 5-port head the single residual
//!   degree of freedom absorbs most single-port errors; the
//!   `probe_accuracy` example shows how often a blocked port goes
//!   unnoticed there.
//! - The covariance is the Cramer-Rao bound of the model at the estimate;
//!   it says nothing about model error (a real head is not a potential-flow
//!   sphere: calibrate, see [`super::calib`]).
//!
//! # Cost
//! One solve of a 7-port head takes a few Levenberg-Marquardt iterations
//! (about five at 1 % noise, including the final convergence check), each
//! one pass over the ports and a written-out 4x4 Cholesky; the working
//! state is on the stack ([`ProbeSolver::fit_state_bytes`]). A failed
//! port test on a 7-port head adds one re-solve per port.

use nalgebra::{Matrix2, Matrix3, Matrix3x2, Matrix4, SMatrix, SVector, Vector2, Vector3, Vector4};

use super::chi2::chi_square_quantile_upper;
use super::layout::{MIN_PORTS, PortSet, ProbeLayout, small};
use super::model::{ProbeModel, Regime, Shape, WakeTreatment};
use super::{ConfigError, InputError, ProbeError, deg};
use crate::gas::IdealGas;

/// How the regime is chosen.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum RegimeChoice {
    /// Always this regime.
    Fixed(Regime),
    /// From the pressures (see the module notes).
    Auto {
        /// Below this isentropic Mach number the flow counts as
        /// incompressible.
        incompressible_below_mach: f64,
        /// Above this subsonic reading a supersonic reading of the same
        /// pressures is preferred when it fits no worse.
        subsonic_up_to_mach: f64,
    },
}

/// Solver settings.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SolverConfig {
    /// Regime choice. Default: automatic, incompressible below Mach 0.3.
    pub regime: RegimeChoice,
    /// Leeward-port treatment of the subsonic shape. Default: attached.
    pub wake: WakeTreatment,
    /// Iteration cap of one Levenberg-Marquardt run. Default 40.
    pub max_iterations: u32,
    /// Stop when the Gauss-Newton step would lower the chi-square by less
    /// than this. Default 1e-10 (the estimate is then within about 1e-5
    /// sigma of the minimum).
    pub tolerance: f64,
    /// Half-angle of the usable cone about the probe axis, rad. Default
    /// 70 deg (the range Gerner, Maurer and Gallington 1984 report for
    /// 7-hole probes).
    pub usable_cone_rad: f64,
    /// Direction is reported invalid when the amplitude is below this many
    /// times the port noise floor. Default 10.
    pub low_flow_multiple: f64,
    /// False-alarm probability of the chi-square port test. Default 1e-3.
    pub false_alarm_probability: f64,
    /// Try leave-one-out isolation when the test fails (needs at least 6
    /// ports). Default true.
    pub isolate_faults: bool,
}

impl Default for SolverConfig {
    fn default() -> Self {
        Self {
            regime: RegimeChoice::Auto {
                incompressible_below_mach: 0.3,
                subsonic_up_to_mach: 0.6,
            },
            wake: WakeTreatment::Attached,
            max_iterations: 40,
            tolerance: 1e-10,
            usable_cone_rad: deg(70.0),
            low_flow_multiple: 10.0,
            false_alarm_probability: 1e-3,
            isolate_faults: true,
        }
    }
}

impl SolverConfig {
    fn check(&self) -> Result<(), ConfigError> {
        if self.max_iterations == 0 {
            return Err(ConfigError::MaxIterations);
        }
        if !(self.tolerance.is_finite() && self.tolerance > 0.0) {
            return Err(ConfigError::Tolerance {
                value: self.tolerance,
            });
        }
        let c = self.usable_cone_rad;
        if !(c.is_finite() && c > 0.0 && c < core::f64::consts::PI) {
            return Err(ConfigError::UsableCone { value_rad: c });
        }
        if !(self.low_flow_multiple.is_finite() && self.low_flow_multiple >= 0.0) {
            return Err(ConfigError::LowFlowMultiple {
                value: self.low_flow_multiple,
            });
        }
        let p = self.false_alarm_probability;
        if !(p > 0.0 && p <= 0.5) {
            return Err(ConfigError::FalseAlarmProbability { value: p });
        }
        if let RegimeChoice::Auto {
            incompressible_below_mach: m,
            subsonic_up_to_mach: s,
        } = self.regime
            && !((0.0..1.0).contains(&m) && s > m && s < 1.0)
        {
            return Err(ConfigError::RegimeMach {
                incompressible_below_mach: m,
                subsonic_up_to_mach: s,
            });
        }
        self.wake.check()
    }
}

/// How one Levenberg-Marquardt run ended.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Convergence {
    /// The next step would change the chi-square by less than the tolerance.
    Converged {
        /// Iterations spent.
        iterations: u32,
    },
    /// The iteration cap was reached first.
    IterationCap {
        /// Iterations spent (the cap).
        iterations: u32,
    },
    /// Damping grew without bound: no step lowers the chi-square.
    Stalled {
        /// Iterations spent.
        iterations: u32,
    },
}

impl Convergence {
    /// Iterations spent.
    #[must_use]
    pub const fn iterations(self) -> u32 {
        match self {
            Self::Converged { iterations }
            | Self::IterationCap { iterations }
            | Self::Stalled { iterations } => iterations,
        }
    }

    /// Whether it converged.
    #[must_use]
    pub const fn converged(self) -> bool {
        matches!(self, Self::Converged { .. })
    }
}

/// The data cannot determine an answer.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum CannotTell {
    /// Fewer usable ports than unknowns.
    TooFewPorts {
        /// Ports left after exclusions.
        usable: u32,
        /// Ports needed (4).
        needed: u32,
    },
    /// Static pressure and amplitude cannot be separated (e.g. every port in
    /// the Newtonian shadow: the flow comes from behind).
    NoAmplitude,
}

/// Why the direction is withheld.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum DirectionInvalid {
    /// The amplitude is below the low-flow threshold. A flow from directly
    /// behind a real head (every port in the wake, nearly equal pressures)
    /// also lands here: uniform pressures are what both produce.
    LowFlow {
        /// Fitted amplitude, Pa.
        amplitude_pa: f64,
        /// Threshold, Pa.
        threshold_pa: f64,
    },
    /// The fit did not converge.
    NotConverged,
    /// The direction is not determined by the data (singular information
    /// matrix).
    Unresolved,
    /// The fitted direction is outside the usable cone: flow from the side
    /// or from behind.
    OutsideUsableCone {
        /// Angle between the fitted flow source and the probe axis, rad.
        off_axis_rad: f64,
        /// The configured limit, rad.
        limit_rad: f64,
    },
}

/// The flow direction, or why there is none.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Direction {
    /// A usable direction.
    Valid {
        /// Unit vector along which the gas moves, probe frame.
        velocity_unit: Vector3<f64>,
        /// Covariance of `velocity_unit` (rank 2, tangent to the sphere).
        covariance: Matrix3<f64>,
        /// Angle between the flow source and the probe axis, rad.
        off_axis_rad: f64,
    },
    /// No usable direction.
    Invalid(DirectionInvalid),
}

/// 1-sigma uncertainties.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FlowSigma {
    /// Total angular uncertainty of the direction, rad (root of the trace of
    /// its tangent-plane covariance); infinite when unresolved.
    pub angle_rad: f64,
    /// Static pressure, Pa.
    pub static_pressure_pa: f64,
    /// Dynamic pressure, Pa.
    pub dynamic_pressure_pa: f64,
    /// Mach number.
    pub mach: f64,
    /// Speed, m/s (when the total temperature was given).
    pub speed_m_per_s: Option<f64>,
}

/// Port-consistency verdict.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum FaultReport {
    /// Exactly as many ports as unknowns: nothing to test.
    NotTestable,
    /// The residuals are consistent with the port sigmas.
    Consistent {
        /// Chi-square of the fit.
        chi_square: f64,
        /// Test threshold.
        threshold: f64,
    },
    /// One port was inconsistent, identified, and left out of the answer.
    Isolated {
        /// The port left out.
        port: usize,
        /// Chi-square with every port.
        chi_square_all: f64,
        /// Chi-square without the port.
        chi_square_without: f64,
    },
    /// The residuals are inconsistent but no single port can be blamed
    /// (always so on a 5-port head). The estimate uses every port.
    DetectedNotIsolated {
        /// Chi-square of the fit.
        chi_square: f64,
        /// Test threshold.
        threshold: f64,
    },
}

/// Everything the solver concluded from one set of port pressures.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FlowSolution {
    /// Flow direction, or why it is withheld.
    pub direction: Direction,
    /// Regime the solution settled in.
    pub regime: Regime,
    /// The automatic regime choice fitted both a subsonic and a supersonic
    /// reading and they fitted equally well (see the module notes): the
    /// regime, static pressure and Mach rest on the configured limit, not
    /// on the data. Always false for a fixed regime.
    pub regime_ambiguous: bool,
    /// How the final fit ended.
    pub convergence: Convergence,
    /// Dynamic pressure `q = gamma/2 p_s M^2 = rho V^2 / 2`, Pa.
    pub dynamic_pressure_pa: f64,
    /// Free-stream static pressure, Pa.
    pub static_pressure_pa: f64,
    /// `p_s + A`: total pressure (subsonic) or pitot pressure behind the
    /// shock (supersonic), Pa.
    pub stagnation_pressure_pa: f64,
    /// Pressure amplitude `A` of the regime, Pa.
    pub amplitude_pa: f64,
    /// Free-stream Mach number.
    pub mach: f64,
    /// Speed, m/s, when the total temperature was given.
    pub speed_m_per_s: Option<f64>,
    /// 1-sigma uncertainties.
    pub sigma: FlowSigma,
    /// Covariance of the unknowns `[t1, t2, p_s, A]` (`t1`, `t2` rad along
    /// `tangent_basis`, pressures Pa); `None` when singular.
    pub covariance: Option<Matrix4<f64>>,
    /// Tangent directions of the first two unknowns (unit vectors
    /// perpendicular to the flow direction).
    pub tangent_basis: [Vector3<f64>; 2],
    /// Chi-square of the final fit.
    pub chi_square: f64,
    /// Its degrees of freedom (ports used minus 4).
    pub degrees_of_freedom: u32,
    /// Ports the final fit used.
    pub ports_used: PortSet,
    /// Port-consistency verdict.
    pub fault: FaultReport,
}

impl FlowSolution {
    /// A valid direction from a converged fit with consistent (or isolated)
    /// ports: what a navigator may act on without second thoughts.
    #[must_use]
    pub fn is_trustworthy(&self) -> bool {
        matches!(self.direction, Direction::Valid { .. })
            && self.convergence.converged()
            && !matches!(self.fault, FaultReport::DetectedNotIsolated { .. })
    }

    /// The velocity direction, if valid.
    #[must_use]
    pub fn velocity_unit(&self) -> Option<Vector3<f64>> {
        match self.direction {
            Direction::Valid { velocity_unit, .. } => Some(velocity_unit),
            Direction::Invalid(_) => None,
        }
    }
}

/// Where to start the search.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Start {
    /// Unit vector along which the gas is believed to move, probe frame.
    pub velocity_unit: [f64; 3],
}

/// Per-call options.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct SolveOptions {
    /// Ports to ignore (their readings are not even validated).
    pub excluded: PortSet,
    /// Starting direction; `None` for the deterministic pressure-weighted
    /// start.
    pub start: Option<Start>,
}

/// Chi-square difference below which two fits are indistinguishable.
const CHI_SQUARE_TIE: f64 = 1.0;

/// Initial relative damping (Marquardt scaling by the diagonal).
const LAMBDA_START: f64 = 1e-3;
/// Relative damping beyond which no step can help.
const LAMBDA_MAX: f64 = 1e16;

/// Safety factor on the first-order rounding bound of the chi-square
/// (`2 eps sum w |r| (|y| + |p_s| + |A S|)`, doubled).
const ROUNDING_ULPS: f64 = 4.0;

/// The state of one Levenberg-Marquardt linearisation.
#[derive(Debug, Clone, Copy, PartialEq)]
struct Lin {
    chi2: f64,
    /// Size of the rounding error in `chi2` (a bound, in chi-square units).
    rounding: f64,
    h: Matrix4<f64>,
    b: Vector4<f64>,
    e1: Vector3<f64>,
    e2: Vector3<f64>,
}

/// A finished fit (pressures relative to the reference pressure).
#[derive(Debug, Clone, Copy, PartialEq)]
struct Fit {
    d: Vector3<f64>,
    ps_rel: f64,
    a: f64,
    lin: Lin,
    convergence: Convergence,
    shape: Shape,
}

/// Inputs of a fit after validation.
#[derive(Debug, Clone, Copy, PartialEq)]
struct Prepared<const N: usize> {
    y: [f64; N],
    p_ref: f64,
}

/// Inverts port pressures of an `N`-port probe.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ProbeSolver<const N: usize> {
    model: ProbeModel<N>,
    config: SolverConfig,
    /// Weights `1/sigma^2`.
    w2: [f64; N],
    /// Chi-square thresholds indexed by degrees of freedom (index 0 unused).
    thresholds: [f64; N],
    /// Sonic isentropic `p0/p` of the gas.
    sonic_ratio: f64,
    /// `p0/p` at the automatic choice's subsonic limit: above it the
    /// supersonic shape is tried too.
    subsonic_limit_ratio: f64,
    /// Chi-square margin by which the isolated hypothesis must beat every
    /// other passing one (the 1-dof threshold).
    isolation_gap: f64,
    /// Weighted least-squares map from the (all-port) pressures to the
    /// quadratic form `M` with `p_i ~ n_i^T M n_i` (six entries), when the
    /// layout determines it (6 or more ports, e.g. the 7-port head).
    quadratic_map: Option<SMatrix<f64, 6, N>>,
}

/// Power-iteration steps of the quadratic-form start.
const POWER_STEPS: usize = 6;

/// The weighted least-squares map `y -> (M11, M22, M33, M12, M13, M23)` of
/// `y_i = n_i^T M n_i` over all ports, if the layout determines `M` (the
/// isotropic part absorbs the constant, since `n^T I n = 1`).
fn quadratic_map<const N: usize>(
    normals: &[Vector3<f64>; N],
    w2: &[f64; N],
) -> Option<SMatrix<f64, 6, N>> {
    let row = |n: &Vector3<f64>| {
        SVector::<f64, 6>::from([
            n.x * n.x,
            n.y * n.y,
            n.z * n.z,
            2.0 * n.x * n.y,
            2.0 * n.x * n.z,
            2.0 * n.y * n.z,
        ])
    };
    let mut a = SMatrix::<f64, 6, 6>::zeros();
    for (n, &w) in normals.iter().zip(w2.iter()) {
        let r = row(n);
        a.ger(w, &r, &r, 1.0);
    }
    let scale = a.diagonal().max();
    let ch = a.cholesky()?;
    let l = ch.l_dirty().diagonal().min();
    if !(scale > 0.0 && l * l > 1e-9 * scale) {
        return None;
    }
    let mut map = SMatrix::<f64, 6, N>::zeros();
    for (mut col, (n, &w)) in map.column_iter_mut().zip(normals.iter().zip(w2.iter())) {
        col.copy_from(&(ch.solve(&row(n)) * w));
    }
    Some(map)
}

/// Cholesky factor `L` (lower) of a symmetric positive-definite 4x4
/// matrix, written out: the solver's hot path, where nalgebra's generic
/// decomposition costs several times more.
#[derive(Debug, Clone, Copy)]
struct Chol4 {
    l11: f64,
    l21: f64,
    l31: f64,
    l41: f64,
    l22: f64,
    l32: f64,
    l42: f64,
    l33: f64,
    l43: f64,
    l44: f64,
}

impl Chol4 {
    /// `None` unless every pivot is positive and finite.
    #[inline]
    fn new(a: &Matrix4<f64>) -> Option<Self> {
        let piv = |x: f64| {
            if x > 0.0 && x.is_finite() {
                Some(libm::sqrt(x))
            } else {
                None
            }
        };
        let l11 = piv(a.m11)?;
        let (l21, l31, l41) = (a.m21 / l11, a.m31 / l11, a.m41 / l11);
        let l22 = piv(a.m22 - l21 * l21)?;
        let l32 = (a.m32 - l31 * l21) / l22;
        let l42 = (a.m42 - l41 * l21) / l22;
        let l33 = piv(a.m33 - l31 * l31 - l32 * l32)?;
        let l43 = (a.m43 - l41 * l31 - l42 * l32) / l33;
        let l44 = piv(a.m44 - l41 * l41 - l42 * l42 - l43 * l43)?;
        Some(Self {
            l11,
            l21,
            l31,
            l41,
            l22,
            l32,
            l42,
            l33,
            l43,
            l44,
        })
    }

    /// `x` with `L L^T x = b`.
    #[inline]
    fn solve(&self, b: &Vector4<f64>) -> Vector4<f64> {
        let y1 = b.x / self.l11;
        let y2 = (b.y - self.l21 * y1) / self.l22;
        let y3 = (b.z - self.l31 * y1 - self.l32 * y2) / self.l33;
        let y4 = (b.w - self.l41 * y1 - self.l42 * y2 - self.l43 * y3) / self.l44;
        let x4 = y4 / self.l44;
        let x3 = (y3 - self.l43 * x4) / self.l33;
        let x2 = (y2 - self.l32 * x3 - self.l42 * x4) / self.l22;
        let x1 = (y1 - self.l21 * x2 - self.l31 * x3 - self.l41 * x4) / self.l11;
        Vector4::new(x1, x2, x3, x4)
    }

    /// The inverse of the factored matrix.
    fn inverse(&self) -> Matrix4<f64> {
        Matrix4::from_columns(&[
            self.solve(&Vector4::new(1.0, 0.0, 0.0, 0.0)),
            self.solve(&Vector4::new(0.0, 1.0, 0.0, 0.0)),
            self.solve(&Vector4::new(0.0, 0.0, 1.0, 0.0)),
            self.solve(&Vector4::new(0.0, 0.0, 0.0, 1.0)),
        ])
    }
}

/// Tangent basis at `d`: deterministic, `(y, z)` for `d = +x`.
fn tangent_basis(d: &Vector3<f64>) -> (Vector3<f64>, Vector3<f64>) {
    let helper = if libm::fabs(d.z) < 0.9 {
        Vector3::new(0.0, 0.0, 1.0)
    } else {
        Vector3::new(1.0, 0.0, 0.0)
    };
    let e1 = helper.cross(d);
    let e1 = e1 / libm::sqrt(e1.norm_squared());
    let e2 = d.cross(&e1);
    (e1, e2)
}

fn unit(v: Vector3<f64>) -> Vector3<f64> {
    v / libm::sqrt(v.norm_squared())
}

impl<const N: usize> ProbeSolver<N> {
    /// A solver for `layout` in `gas` with `config`.
    ///
    /// # Errors
    /// [`ProbeError::Config`] for an out-of-range setting (including a
    /// chi-square threshold that cannot be computed).
    pub fn new(
        layout: ProbeLayout<N>,
        gas: IdealGas,
        config: SolverConfig,
    ) -> Result<Self, ProbeError> {
        config.check()?;
        let model = ProbeModel::new(layout, gas, config.wake)?;
        let mut w2 = [0.0; N];
        for (w, s) in w2.iter_mut().zip(layout.sigma_pa().iter()) {
            *w = 1.0 / (s * s);
        }
        let mut thresholds = [0.0; N];
        for (dof, t) in thresholds.iter_mut().enumerate() {
            // dof 1 ..= N - 4 are the ones a fit can have.
            if dof >= 1 && dof + MIN_PORTS <= N {
                *t = chi_square_quantile_upper(small(dof), config.false_alarm_probability)
                    .map_err(ConfigError::ChiSquare)?;
            }
        }
        let quadratic_map = quadratic_map(layout.normals(), &w2);
        Ok(Self {
            model,
            config,
            w2,
            thresholds,
            quadratic_map,
            sonic_ratio: gas.p0_over_p(1.0)?,
            subsonic_limit_ratio: match config.regime {
                RegimeChoice::Auto {
                    subsonic_up_to_mach,
                    ..
                } => gas.p0_over_p(subsonic_up_to_mach)?,
                RegimeChoice::Fixed(_) => f64::INFINITY,
            },
            isolation_gap: chi_square_quantile_upper(1, config.false_alarm_probability)
                .map_err(ConfigError::ChiSquare)?,
        })
    }

    /// The forward model the solver inverts (same layout, gas and wake).
    #[must_use]
    pub const fn model(&self) -> &ProbeModel<N> {
        &self.model
    }

    /// The settings.
    #[must_use]
    pub const fn config(&self) -> &SolverConfig {
        &self.config
    }

    /// The chi-square threshold for `dof` degrees of freedom (`None`
    /// outside `1..=N-4`).
    #[must_use]
    pub fn chi_square_threshold(&self, dof: usize) -> Option<f64> {
        if dof == 0 {
            return None;
        }
        self.thresholds.get(dof).copied().filter(|t| *t > 0.0)
    }

    /// Bytes of the per-solve working state kept on the stack by one fit
    /// (linearisation, fit record and prepared inputs); the solver itself
    /// is `size_of::<ProbeSolver<N>>()`.
    #[must_use]
    pub const fn fit_state_bytes() -> usize {
        core::mem::size_of::<Fit>() * 2
            + core::mem::size_of::<Lin>()
            + core::mem::size_of::<Prepared<N>>()
            + core::mem::size_of::<[f64; N]>()
    }

    /// Solve with every port and the default start.
    ///
    /// `pressures_pa`: absolute port readings, layout order.
    /// `total_temperature_k`: gas total temperature if known (for speed).
    ///
    /// # Errors
    /// [`ProbeError::Input`] for NaN, infinite or non-positive pressures or
    /// a bad temperature; [`ProbeError::CannotTell`] when the data cannot
    /// determine an answer.
    pub fn solve(
        &self,
        pressures_pa: &[f64; N],
        total_temperature_k: Option<f64>,
    ) -> Result<FlowSolution, ProbeError> {
        self.solve_with(pressures_pa, total_temperature_k, &SolveOptions::default())
    }

    /// [`Self::solve`] from a slice; refuses a wrong port count.
    ///
    /// # Errors
    /// [`InputError::PortCount`] when `pressures_pa.len() != N`; otherwise
    /// as [`Self::solve`].
    pub fn solve_slice(
        &self,
        pressures_pa: &[f64],
        total_temperature_k: Option<f64>,
    ) -> Result<FlowSolution, ProbeError> {
        let arr: &[f64; N] = pressures_pa.try_into().map_err(|_| InputError::PortCount {
            got: pressures_pa.len(),
            expected: N,
        })?;
        self.solve(arr, total_temperature_k)
    }

    /// Solve with options: excluded ports, a starting direction.
    ///
    /// # Errors
    /// As [`Self::solve`]; [`InputError::PortIndex`] for an exclusion beyond
    /// the layout; [`InputError::Start`] for a bad start.
    pub fn solve_with(
        &self,
        pressures_pa: &[f64; N],
        total_temperature_k: Option<f64>,
        options: &SolveOptions,
    ) -> Result<FlowSolution, ProbeError> {
        let all = PortSet::first(N);
        let extra = options.excluded.bits() & !all.bits();
        if extra != 0 {
            return Err(InputError::PortIndex {
                port: usize::try_from(extra.trailing_zeros()).unwrap_or(usize::MAX),
                ports: N,
            }
            .into());
        }
        let mask = PortSet::from_bits(all.bits() & !options.excluded.bits());
        let prep = self.prepare(pressures_pa, mask)?;
        if let Some(t) = total_temperature_k
            && !(t.is_finite() && t > 0.0)
        {
            return Err(InputError::Temperature { value_k: t }.into());
        }
        let used = mask.count();
        if usize::try_from(used).unwrap_or(0) < MIN_PORTS {
            return Err(CannotTell::TooFewPorts {
                usable: used,
                needed: small(MIN_PORTS),
            }
            .into());
        }
        let w2 = self.masked_weights(mask);
        // Starts: the caller's, else the quadratic-form refinement of the
        // pressure-weighted mean (all ports) with the plain weighted mean as
        // the alternative when the first fit looks wrong.
        let (d0, d_alt) = match options.start {
            Some(s) => {
                let v = Vector3::new(s.velocity_unit[0], s.velocity_unit[1], s.velocity_unit[2]);
                let n = v.norm();
                if !(n.is_finite() && libm::fabs(n - 1.0) < 1e-6) {
                    return Err(InputError::Start.into());
                }
                (-v / n, None)
            }
            None => {
                let d = self.initial_direction(&prep.y, &w2);
                if mask == all && self.quadratic_map.is_some() {
                    (self.quadratic_direction(&prep.y, d), Some(d))
                } else {
                    (d, None)
                }
            }
        };
        let used_dof = usize::try_from(used).unwrap_or(0).saturating_sub(MIN_PORTS);
        let suspicious = |f: &Fit| {
            !f.convergence.converged()
                || self
                    .chi_square_threshold(used_dof)
                    .is_some_and(|t| f.lin.chi2 > t)
        };
        // A fit with a positive amplitude beats one without (a negative
        // amplitude is an inverted, unphysical pattern); then the lower
        // chi-square wins.
        let better = |g: &Fit, f: &Fit| {
            g.convergence.converged()
                && ((g.a > 0.0 && f.a <= 0.0)
                    || ((g.a > 0.0) == (f.a > 0.0)
                        && (g.lin.chi2 < f.lin.chi2 || !f.convergence.converged())))
        };
        let fit_from = |shape: Shape, d: Vector3<f64>| -> Result<Fit, ProbeError> {
            let f = self.lm(&prep, &w2, shape, d)?;
            match d_alt {
                Some(alt) if suspicious(&f) || f.a <= 0.0 => {
                    match self.lm(&prep, &w2, shape, alt) {
                        Ok(g) if better(&g, &f) => Ok(g),
                        _ => Ok(f),
                    }
                }
                _ => Ok(f),
            }
        };

        // Regime and first fit.
        let sphere = Shape::for_regime(Regime::Incompressible, self.config.wake);
        let (fit, regime_kind, ambiguous) = match self.config.regime {
            RegimeChoice::Fixed(r) => {
                let shape = Shape::for_regime(r, self.config.wake);
                (fit_from(shape, d0)?, Some(r), false)
            }
            RegimeChoice::Auto { .. } => {
                let fs = fit_from(sphere, d0)?;
                let ratio = 1.0 + fs.a / (fs.ps_rel + prep.p_ref);
                if ratio > self.subsonic_limit_ratio {
                    match self.lm(&prep, &w2, Shape::Newtonian, fs.d) {
                        Ok(fnw) if 1.0 + fnw.a / (fnw.ps_rel + prep.p_ref) >= self.sonic_ratio => {
                            let tie = libm::fabs(fnw.lin.chi2 - fs.lin.chi2) < CHI_SQUARE_TIE;
                            if fnw.lin.chi2 < fs.lin.chi2 + CHI_SQUARE_TIE {
                                (fnw, Some(Regime::Supersonic), tie)
                            } else {
                                (fs, None, tie)
                            }
                        }
                        _ => (fs, None, false),
                    }
                } else {
                    (fs, None, false)
                }
            }
        };

        // Port-consistency test and isolation.
        let (fit, mask, fault) = self.fault_test(&prep, mask, fit)?;
        let mut sol = self.finish(&prep, mask, fit, regime_kind, fault, total_temperature_k)?;
        sol.regime_ambiguous = ambiguous;
        Ok(sol)
    }

    fn prepare(&self, pressures_pa: &[f64; N], mask: PortSet) -> Result<Prepared<N>, ProbeError> {
        let mut y = [0.0; N];
        let mut sum = 0.0;
        let mut count = 0.0;
        for (port, ((yi, &p), &b)) in y
            .iter_mut()
            .zip(pressures_pa.iter())
            .zip(self.model.layout().bias_pa().iter())
            .enumerate()
        {
            if !mask.contains(port) {
                continue;
            }
            if !p.is_finite() {
                return Err(InputError::NonFinitePressure { port, value_pa: p }.into());
            }
            if p <= 0.0 {
                return Err(InputError::NonPositivePressure { port, value_pa: p }.into());
            }
            *yi = p - b;
            sum += *yi;
            count += 1.0;
        }
        let p_ref = if count > 0.0 { sum / count } else { 0.0 };
        for (port, yi) in y.iter_mut().enumerate() {
            if mask.contains(port) {
                *yi -= p_ref;
            } else {
                *yi = 0.0;
            }
        }
        Ok(Prepared { y, p_ref })
    }

    fn masked_weights(&self, mask: PortSet) -> [f64; N] {
        let mut w = self.w2;
        for (port, wi) in w.iter_mut().enumerate() {
            if !mask.contains(port) {
                *wi = 0.0;
            }
        }
        w
    }

    /// Pressure-weighted mean of the normals (weights `(y - min y)^2`).
    fn initial_direction(&self, y: &[f64; N], w2: &[f64; N]) -> Vector3<f64> {
        let mut ymin = f64::INFINITY;
        for (&yi, &wi) in y.iter().zip(w2.iter()) {
            if wi > 0.0 && yi < ymin {
                ymin = yi;
            }
        }
        let mut s = Vector3::zeros();
        for ((n, &yi), &wi) in self
            .model
            .layout()
            .normals()
            .iter()
            .zip(y.iter())
            .zip(w2.iter())
        {
            if wi > 0.0 {
                let t = yi - ymin;
                s += n * (t * t);
            }
        }
        let len = s.norm();
        if len > 0.0 && len.is_finite() {
            s / len
        } else {
            Vector3::new(1.0, 0.0, 0.0)
        }
    }

    /// Refine a start with the quadratic form of the pressures: both the
    /// sphere and (all ports windward) the Newtonian shape give
    /// `p_i = a + b (n_i . d)^2 = n_i^T (b d d^T + a I) n_i`, so `d` is the
    /// eigenvector of the largest eigenvalue of the traceless part of the
    /// fitted form. Power iteration from `d0`: two steps shifted by the
    /// form's Frobenius norm (so the most positive eigenvalue wins), then
    /// steps shifted by half the Rayleigh quotient (for exact data the
    /// other two eigenvalues are then zero).
    fn quadratic_direction(&self, y: &[f64; N], d0: Vector3<f64>) -> Vector3<f64> {
        let Some(map) = &self.quadratic_map else {
            return d0;
        };
        let m = map * SVector::<f64, N>::from(*y);
        let (m11, m22, m33, m12, m13, m23) = (m.x, m.y, m.z, m.w, m.a, m.b);
        let t = (m11 + m22 + m33) / 3.0;
        let q = Matrix3::new(m11 - t, m12, m13, m12, m22 - t, m23, m13, m23, m33 - t);
        // First steps shifted by the Frobenius norm (>= every |eigenvalue|)
        // so that the most POSITIVE eigenvalue dominates: a negative one
        // would be an inverted (unphysical, A < 0) pattern.
        let frob = libm::sqrt(q.norm_squared());
        let mut shifted = q + Matrix3::from_diagonal_element(frob);
        let mut v = d0;
        for step in 0..POWER_STEPS {
            if step == 2 {
                let rayleigh = v.dot(&(q * v));
                if rayleigh.is_nan() || rayleigh <= 0.0 {
                    return d0;
                }
                shifted = q + Matrix3::from_diagonal_element(0.5 * rayleigh);
            }
            let w = shifted * v;
            let len = libm::sqrt(w.norm_squared());
            if !(len > 0.0 && len.is_finite()) {
                return d0;
            }
            v = w / len;
        }
        if v.dot(&d0) < 0.0 { -v } else { v }
    }

    /// Closed-form `(p_s, A)` at direction `d`; `None` when the shape is
    /// the same at every used port (the two cannot be separated there).
    fn linear_fit(
        &self,
        y: &[f64; N],
        w2: &[f64; N],
        shape: Shape,
        d: &Vector3<f64>,
    ) -> Option<(f64, f64)> {
        let (mut sw, mut sws, mut swss, mut swy, mut swsy) = (0.0, 0.0, 0.0, 0.0, 0.0);
        for ((n, &yi), &wi) in self
            .model
            .layout()
            .normals()
            .iter()
            .zip(y.iter())
            .zip(w2.iter())
        {
            let (s, _) = shape.eval(n.dot(d));
            sw += wi;
            sws += wi * s;
            swss += wi * s * s;
            swy += wi * yi;
            swsy += wi * s * yi;
        }
        let det = sw * swss - sws * sws;
        if sw > 0.0 && det > 1e-12 * sw * swss {
            Some((
                (swss * swy - sws * swsy) / det,
                (sw * swsy - sws * swy) / det,
            ))
        } else {
            None
        }
    }

    fn linearize(
        &self,
        y: &[f64; N],
        w2: &[f64; N],
        shape: Shape,
        d: &Vector3<f64>,
        ps: f64,
        a: f64,
    ) -> Lin {
        let (e1, e2) = tangent_basis(d);
        // J^T W J, lower triangle: entry (i, k) sums (w j_k) j_i over the
        // ports, the products `Matrix::ger` forms. The upper triangle is
        // mirrored: only the lower one is ever read (Chol4, the diagonal),
        // and (2, 3) equals (3, 2) exactly since j_2 = 1.
        let (mut h00, mut h10, mut h20, mut h30) = (0.0, 0.0, 0.0, 0.0);
        let (mut h11, mut h21, mut h31) = (0.0, 0.0, 0.0);
        let (mut h22, mut h32, mut h33) = (0.0, 0.0, 0.0);
        let mut b = Vector4::zeros();
        let mut chi2 = 0.0;
        let mut rounding = 0.0;
        for ((n, &yi), &wi) in self
            .model
            .layout()
            .normals()
            .iter()
            .zip(y.iter())
            .zip(w2.iter())
        {
            if wi == 0.0 {
                continue;
            }
            let (s, ds) = shape.eval(n.dot(d));
            let r = yi - ps - a * s;
            let g = a * ds;
            let (j0, j1, j2, j3) = (g * n.dot(&e1), g * n.dot(&e2), 1.0, s);
            let (w0, w1, w2k, w3) = (wi * j0, wi * j1, wi * j2, wi * j3);
            h00 += w0 * j0;
            h10 += w0 * j1;
            h20 += w0 * j2;
            h30 += w0 * j3;
            h11 += w1 * j1;
            h21 += w1 * j2;
            h31 += w1 * j3;
            h22 += w2k * j2;
            h32 += w2k * j3;
            h33 += w3 * j3;
            b.axpy(wi * r, &Vector4::new(j0, j1, j2, j3), 1.0);
            chi2 += wi * r * r;
            rounding += wi * libm::fabs(r) * (libm::fabs(yi) + libm::fabs(ps) + libm::fabs(a * s));
        }
        #[rustfmt::skip]
        let h = Matrix4::new(
            h00, h10, h20, h30,
            h10, h11, h21, h31,
            h20, h21, h22, h32,
            h30, h31, h32, h33,
        );
        Lin {
            chi2,
            rounding: ROUNDING_ULPS * f64::EPSILON * rounding,
            h,
            b,
            e1,
            e2,
        }
    }

    /// One Levenberg-Marquardt run from direction `d0`.
    fn lm(
        &self,
        prep: &Prepared<N>,
        w2: &[f64; N],
        shape: Shape,
        d0: Vector3<f64>,
    ) -> Result<Fit, ProbeError> {
        let y = &prep.y;
        // Static pressure and amplitude cannot be separated where every port
        // sees the same shape value; then try the probe axis.
        let axis = Vector3::new(1.0, 0.0, 0.0);
        let (mut d, (mut ps, mut a)) = match self.linear_fit(y, w2, shape, &d0) {
            Some(pa) => (d0, pa),
            None => (
                axis,
                self.linear_fit(y, w2, shape, &axis)
                    .ok_or(CannotTell::NoAmplitude)?,
            ),
        };
        let mut lin = self.linearize(y, w2, shape, &d, ps, a);
        let floor = 1e-15 * lin.h.trace();
        // Damping relative to the diagonal (Marquardt scaling).
        let mut lambda = LAMBDA_START;
        let mut nu = 2.0;
        let max_it = self.config.max_iterations;
        let tol = self.config.tolerance;
        let mut convergence = Convergence::IterationCap { iterations: max_it };
        for it in 1..=max_it {
            let dg = lin.h.diagonal().map(|v| if v > floor { v } else { floor });
            let m = lin.h + Matrix4::from_diagonal(&(dg * lambda));
            let Some(ch) = Chol4::new(&m) else {
                lambda *= nu;
                nu *= 2.0;
                continue;
            };
            let delta = ch.solve(&lin.b);
            let predicted = delta.dot(&lin.b) + lambda * delta.dot(&dg.component_mul(&delta));
            if !predicted.is_finite() {
                convergence = Convergence::Stalled { iterations: it };
                break;
            }
            // Changes below the rounding error of the chi-square cannot be
            // seen, so they cannot be asked for.
            let tol_eff = tol.max(lin.rounding);
            if predicted <= tol_eff {
                // Small because of heavy damping, or because the minimum is
                // reached? Check the undamped step.
                let gn = if lambda <= 1e-6 {
                    predicted
                } else {
                    // Undamped, or barely damped where the information is
                    // singular (no flow: the direction is not determined).
                    Chol4::new(&lin.h)
                        .or_else(|| Chol4::new(&(lin.h + Matrix4::from_diagonal(&(dg * 1e-9)))))
                        .map_or(f64::INFINITY, |c| c.solve(&lin.b).dot(&lin.b))
                };
                if gn <= tol_eff {
                    convergence = Convergence::Converged { iterations: it };
                    break;
                }
            }
            let [t1, t2, dps, da] = [delta.x, delta.y, delta.z, delta.w];
            let d_new = unit(d + lin.e1 * t1 + lin.e2 * t2);
            let ps_new = ps + dps;
            let a_new = a + da;
            let lin_new = self.linearize(y, w2, shape, &d_new, ps_new, a_new);
            let actual = lin.chi2 - lin_new.chi2;
            let rho = actual / predicted;
            if rho > 0.0 && lin_new.chi2.is_finite() && d_new.x.is_finite() {
                d = d_new;
                ps = ps_new;
                a = a_new;
                lin = lin_new;
                let t = 2.0 * rho - 1.0;
                let f = 1.0 - t * t * t;
                lambda *= if f > 1.0 / 3.0 { f } else { 1.0 / 3.0 };
                nu = 2.0;
            } else {
                lambda *= nu;
                nu *= 2.0;
                if lambda.is_nan() || lambda >= LAMBDA_MAX {
                    convergence = Convergence::Stalled { iterations: it };
                    break;
                }
            }
        }
        Ok(Fit {
            d,
            ps_rel: ps,
            a,
            lin,
            convergence,
            shape,
        })
    }

    fn fault_test(
        &self,
        prep: &Prepared<N>,
        mask: PortSet,
        fit: Fit,
    ) -> Result<(Fit, PortSet, FaultReport), ProbeError> {
        let used = usize::try_from(mask.count()).unwrap_or(0);
        let dof = used.saturating_sub(MIN_PORTS);
        let Some(threshold) = self.chi_square_threshold(dof) else {
            return Ok((fit, mask, FaultReport::NotTestable));
        };
        let chi = fit.lin.chi2;
        if chi <= threshold {
            return Ok((
                fit,
                mask,
                FaultReport::Consistent {
                    chi_square: chi,
                    threshold,
                },
            ));
        }
        let not_isolated = FaultReport::DetectedNotIsolated {
            chi_square: chi,
            threshold,
        };
        let Some(threshold_loo) = self.chi_square_threshold(dof - 1) else {
            return Ok((fit, mask, not_isolated));
        };
        if !self.config.isolate_faults {
            return Ok((fit, mask, not_isolated));
        }
        // The single-fault hypothesis with the lowest chi-square is the
        // likeliest; it is accepted when it passes its own test and every
        // other hypothesis either fails or is worse by at least the 1-dof
        // threshold (a likelihood ratio of exp(gap/2), e.g. > 200:1 at the
        // default false-alarm probability).
        let mut best: Option<(usize, Fit)> = None;
        let mut second = f64::INFINITY;
        for port in 0..N {
            if !mask.contains(port) {
                continue;
            }
            let m = mask.without(port);
            let w2 = self.masked_weights(m);
            let Ok(f) = self.lm(prep, &w2, fit.shape, fit.d) else {
                continue;
            };
            if !f.convergence.converged() {
                continue;
            }
            match best {
                Some((_, b)) if f.lin.chi2 >= b.lin.chi2 => {
                    if f.lin.chi2 < second {
                        second = f.lin.chi2;
                    }
                }
                Some((_, b)) => {
                    second = b.lin.chi2;
                    best = Some((port, f));
                }
                None => best = Some((port, f)),
            }
        }
        let gap = self.isolation_gap;
        match best {
            Some((port, f))
                if f.lin.chi2 <= threshold_loo
                    && (second > threshold_loo || second - f.lin.chi2 >= gap) =>
            {
                Ok((
                    f,
                    mask.without(port),
                    FaultReport::Isolated {
                        port,
                        chi_square_all: chi,
                        chi_square_without: f.lin.chi2,
                    },
                ))
            }
            _ => Ok((fit, mask, not_isolated)),
        }
    }

    #[allow(clippy::too_many_lines)]
    fn finish(
        &self,
        prep: &Prepared<N>,
        mask: PortSet,
        mut fit: Fit,
        regime_kind: Option<Regime>,
        fault: FaultReport,
        total_temperature_k: Option<f64>,
    ) -> Result<FlowSolution, ProbeError> {
        let gas = self.model.gas();
        let g = gas.gamma();
        let w2 = self.masked_weights(mask);
        if fit.shape.is_even() && fit.d.x < 0.0 {
            // p(d) = p(-d) exactly: report the windward representative.
            fit.d = -fit.d;
            fit.lin = self.linearize(&prep.y, &w2, fit.shape, &fit.d, fit.ps_rel, fit.a);
        }
        let ps = fit.ps_rel + prep.p_ref;
        let a = fit.a;
        if !(ps > 0.0 && ps.is_finite() && a.is_finite()) {
            return Err(CannotTell::NoAmplitude.into());
        }
        let ratio = 1.0 + a / ps;

        // Regime label (and the isentropic Mach it rests on, reused below).
        let mut isentropic_mach = None;
        let regime = match (regime_kind, self.config.regime) {
            (Some(r), _) => r,
            (
                None,
                RegimeChoice::Auto {
                    incompressible_below_mach,
                    ..
                },
            ) => {
                let m = if ratio > 1.0 {
                    let m = gas.mach_from_p0_over_p(ratio)?;
                    isentropic_mach = Some(m);
                    m
                } else {
                    0.0
                };
                if m < incompressible_below_mach {
                    Regime::Incompressible
                } else {
                    Regime::CompressibleSubsonic
                }
            }
            (None, RegimeChoice::Fixed(r)) => r,
        };

        // Derived quantities and their gradients wrt (p_s, A).
        let (mach, g_mach, q, g_q) = match regime {
            Regime::Incompressible => {
                if a > 0.0 {
                    let m = libm::sqrt(2.0 * a / (g * ps));
                    (
                        m,
                        Vector2::new(-0.5 * m / ps, 0.5 * m / a),
                        a,
                        Vector2::new(0.0, 1.0),
                    )
                } else {
                    (0.0, Vector2::zeros(), a, Vector2::new(0.0, 1.0))
                }
            }
            Regime::CompressibleSubsonic | Regime::Supersonic => {
                if ratio > 1.0 {
                    // Up to the sonic ratio `mach_from_pitot_over_static` is
                    // `mach_from_p0_over_p` (it compares with the same
                    // `p0_over_p(1.0)` as `sonic_ratio`): skip its two
                    // power evaluations when the label already did it.
                    let m = match isentropic_mach {
                        Some(m) if ratio <= self.sonic_ratio => m,
                        _ if ratio <= self.sonic_ratio => gas.mach_from_p0_over_p(ratio)?,
                        _ => gas.mach_from_pitot_over_static(ratio)?,
                    };
                    let dm_dr = if regime == Regime::Supersonic && ratio >= self.sonic_ratio {
                        // d ln(p02/p1)/dM from NACA 1135 eq. 100.
                        let m2 = m * m;
                        let dln = 2.0 * g / ((g - 1.0) * m)
                            - 4.0 * g * m / ((g - 1.0) * (2.0 * g * m2 - (g - 1.0)));
                        1.0 / (ratio * dln)
                    } else {
                        // Isentropic: d(M^2)/dr = (2/gamma) r^(-1/gamma).
                        libm::pow(ratio, -1.0 / g) / (g * m)
                    };
                    let dr = Vector2::new(-a / (ps * ps), 1.0 / ps);
                    let gm = dr * dm_dr;
                    let q = 0.5 * g * ps * m * m;
                    let gq = Vector2::new(0.5 * g * m * m, 0.0) + gm * (g * ps * m);
                    (m, gm, q, gq)
                } else {
                    (0.0, Vector2::zeros(), 0.0, Vector2::new(0.0, 1.0))
                }
            }
        };

        // Covariance; inflated by the reduced chi-square when the ports are
        // inconsistent and no port could be blamed (the sigmas evidently do
        // not describe the residuals).
        let inflate = match fault {
            FaultReport::DetectedNotIsolated { chi_square, .. } => {
                let dof = mask.count().saturating_sub(small(MIN_PORTS));
                if dof > 0 {
                    (chi_square / f64::from(dof)).max(1.0)
                } else {
                    1.0
                }
            }
            _ => 1.0,
        };
        let covariance = Chol4::new(&fit.lin.h).map(|c| c.inverse() * inflate);
        let lin_cov = match covariance {
            Some(c) => Matrix2::new(c.m33, c.m34, c.m43, c.m44),
            None => {
                let h = &fit.lin.h;
                Matrix2::new(h.m33, h.m34, h.m43, h.m44)
                    .try_inverse()
                    .map_or(Matrix2::from_diagonal_element(f64::INFINITY), |m| {
                        m * inflate
                    })
            }
        };
        let sd = |grad: &Vector2<f64>| libm::sqrt((grad.transpose() * lin_cov * grad).x.max(0.0));
        let sigma_q = sd(&g_q);
        let mut sigma_mach = sd(&g_mach);
        if mach == 0.0 {
            // At zero amplitude the Mach gradient is singular: quote the Mach
            // number a one-sigma dynamic pressure would mean.
            sigma_mach = libm::sqrt(2.0 * sigma_q / (g * ps));
        }
        let (speed, sigma_speed) = match total_temperature_k {
            Some(t0) => {
                let k = 0.5 * (g - 1.0);
                let base = 1.0 + k * mach * mach;
                let a0 = libm::sqrt(g * gas.r_j_per_kg_k() * t0);
                let v = mach * a0 / libm::sqrt(base);
                let dv_dm = a0 / (base * libm::sqrt(base));
                (Some(v), Some(dv_dm * sigma_mach))
            }
            None => (None, None),
        };
        let (e1, e2) = (fit.lin.e1, fit.lin.e2);
        let angle_sigma = match covariance {
            Some(c) => libm::sqrt((c.m11 + c.m22).max(0.0)),
            None => f64::INFINITY,
        };

        // Direction validity.
        let noise_floor = {
            let (mut s, mut n) = (0.0, 0.0);
            for (&w, port) in self.w2.iter().zip(0..N) {
                if mask.contains(port) {
                    s += 1.0 / w;
                    n += 1.0;
                }
            }
            libm::sqrt(s / n)
        };
        let threshold_pa = self.config.low_flow_multiple * noise_floor;
        let off_axis = libm::acos(fit.d.x.clamp(-1.0, 1.0));
        let direction = if !fit.convergence.converged() {
            Direction::Invalid(DirectionInvalid::NotConverged)
        } else if a.is_nan() || a < threshold_pa {
            Direction::Invalid(DirectionInvalid::LowFlow {
                amplitude_pa: a,
                threshold_pa,
            })
        } else if let Some(c) = covariance {
            if off_axis > self.config.usable_cone_rad {
                Direction::Invalid(DirectionInvalid::OutsideUsableCone {
                    off_axis_rad: off_axis,
                    limit_rad: self.config.usable_cone_rad,
                })
            } else {
                let basis = Matrix3x2::from_columns(&[e1, e2]);
                let t = Matrix2::new(c.m11, c.m12, c.m21, c.m22);
                Direction::Valid {
                    velocity_unit: -fit.d,
                    covariance: basis * t * basis.transpose(),
                    off_axis_rad: off_axis,
                }
            }
        } else {
            Direction::Invalid(DirectionInvalid::Unresolved)
        };

        Ok(FlowSolution {
            direction,
            regime,
            regime_ambiguous: false,
            convergence: fit.convergence,
            dynamic_pressure_pa: q,
            static_pressure_pa: ps,
            stagnation_pressure_pa: ps + a,
            amplitude_pa: a,
            mach,
            speed_m_per_s: speed,
            sigma: FlowSigma {
                angle_rad: angle_sigma,
                static_pressure_pa: libm::sqrt(lin_cov.m11.max(0.0)),
                dynamic_pressure_pa: sigma_q,
                mach: sigma_mach,
                speed_m_per_s: sigma_speed,
            },
            covariance,
            tangent_basis: [e1, e2],
            chi_square: fit.lin.chi2,
            degrees_of_freedom: mask.count().saturating_sub(small(MIN_PORTS)),
            ports_used: mask,
            fault,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::probe::{FlowCondition, ModelError};
    use rand_chacha::ChaCha8Rng;
    use rand_core::{RngCore, SeedableRng};

    const AIR: IdealGas = IdealGas::DRY_AIR;

    fn seven(sigma: f64) -> ProbeLayout<7> {
        ProbeLayout::seven_port(deg(40.0), sigma).unwrap()
    }

    fn five(sigma: f64) -> ProbeLayout<5> {
        ProbeLayout::five_port(deg(45.0), sigma).unwrap()
    }

    /// Velocity with the flow source `theta` off the axis at azimuth `phi`.
    fn vel(theta_deg: f64, phi_deg: f64) -> [f64; 3] {
        let (t, p) = (deg(theta_deg), deg(phi_deg));
        [
            -libm::cos(t),
            -libm::sin(t) * libm::cos(p),
            -libm::sin(t) * libm::sin(p),
        ]
    }

    fn angle(a: &Vector3<f64>, b: [f64; 3]) -> f64 {
        let b = Vector3::new(b[0], b[1], b[2]);
        libm::atan2(a.cross(&b).norm(), a.dot(&b))
    }

    fn uniform(rng: &mut ChaCha8Rng) -> f64 {
        f64::from(rng.next_u32()) / 4_294_967_296.0
    }

    fn normal(rng: &mut ChaCha8Rng) -> f64 {
        let u1 = 1.0 - uniform(rng);
        let u2 = uniform(rng);
        libm::sqrt(-2.0 * libm::log(u1)) * libm::cos(2.0 * core::f64::consts::PI * u2)
    }

    #[test]
    fn exact_data_is_recovered_in_every_regime() {
        let solver = ProbeSolver::new(seven(1.0), AIR, SolverConfig::default()).unwrap();
        let cases = [
            (Regime::Incompressible, 0.08, 0.0, 0.0),
            (Regime::Incompressible, 0.1, 35.0, 200.0),
            (Regime::Incompressible, 0.2, 62.0, 17.0),
            (Regime::CompressibleSubsonic, 0.5, 25.0, 100.0),
            (Regime::CompressibleSubsonic, 0.55, 10.0, 300.0),
            (Regime::Supersonic, 1.5, 15.0, 45.0),
            (Regime::Supersonic, 2.5, 30.0, 250.0),
        ];
        for (regime, mach, theta, phi) in cases {
            let v = vel(theta, phi);
            let flow = FlowCondition {
                velocity_unit: v,
                static_pressure_pa: 80_000.0,
                mach,
            };
            let p = solver.model().port_pressures(regime, &flow).unwrap();
            let sol = solver.solve(&p, Some(300.0)).unwrap();
            assert_eq!(sol.regime, regime, "{regime:?} M {mach}");
            let Direction::Valid { velocity_unit, .. } = sol.direction else {
                panic!("{regime:?}: {:?}", sol.direction);
            };
            assert!(angle(&velocity_unit, v) < 1e-8, "{regime:?} M {mach}");
            assert!(
                (sol.mach - mach).abs() < 1e-8 * mach,
                "{regime:?}: {}",
                sol.mach
            );
            assert!((sol.static_pressure_pa - 80_000.0).abs() < 1e-5);
            let q = AIR.dynamic_pressure_pa(80_000.0, mach).unwrap();
            assert!((sol.dynamic_pressure_pa / q - 1.0).abs() < 1e-8);
            assert!(sol.convergence.converged());
            assert!(sol.is_trustworthy());
        }
    }

    /// Speed from q and density: V = sqrt(2 q / rho), rho = p / (R T),
    /// T = T0 / (1 + (gamma-1)/2 M^2) (NACA 1135 eq. 43; ideal-gas law).
    #[test]
    fn speed_from_q_and_density() {
        let solver = ProbeSolver::new(seven(1.0), AIR, SolverConfig::default()).unwrap();
        let flow =
            FlowCondition::from_dynamic_pressure(&AIR, vel(20.0, 40.0), 101_325.0, 500.0).unwrap();
        let p = solver
            .model()
            .port_pressures(Regime::Incompressible, &flow)
            .unwrap();
        let t0 = 293.15;
        let sol = solver.solve(&p, Some(t0)).unwrap();
        let t = t0 / AIR.t0_over_t(sol.mach).unwrap();
        let rho = AIR.density_kg_per_m3(sol.static_pressure_pa, t).unwrap();
        let v = libm::sqrt(2.0 * sol.dynamic_pressure_pa / rho);
        assert!((sol.speed_m_per_s.unwrap() / v - 1.0).abs() < 1e-12);
        // About 29 m/s for q = 500 Pa in sea-level air (rho ~ 1.2).
        assert!(v > 28.0 && v < 30.0);
        assert!(solver.solve(&p, None).unwrap().speed_m_per_s.is_none());
    }

    #[test]
    fn biases_are_removed() {
        let layout = seven(1.0)
            .with_bias(3, 40.0)
            .unwrap()
            .with_bias(0, -12.0)
            .unwrap();
        let solver = ProbeSolver::new(layout, AIR, SolverConfig::default()).unwrap();
        let v = vel(30.0, 120.0);
        let flow = FlowCondition::from_dynamic_pressure(&AIR, v, 90_000.0, 800.0).unwrap();
        let mut p = solver
            .model()
            .port_pressures(Regime::Incompressible, &flow)
            .unwrap();
        p[3] += 40.0;
        p[0] -= 12.0;
        let sol = solver.solve(&p, None).unwrap();
        assert!(angle(&sol.velocity_unit().unwrap(), v) < 1e-8);
        assert!(matches!(sol.fault, FaultReport::Consistent { .. }));
    }

    #[test]
    fn bad_input_is_typed() {
        let solver = ProbeSolver::new(five(1.0), AIR, SolverConfig::default()).unwrap();
        let good = [101_000.0; 5];
        let mut p = good;
        p[2] = f64::NAN;
        assert!(matches!(
            solver.solve(&p, None),
            Err(ProbeError::Input(InputError::NonFinitePressure {
                port: 2,
                ..
            }))
        ));
        p[2] = f64::INFINITY;
        assert!(matches!(
            solver.solve(&p, None),
            Err(ProbeError::Input(InputError::NonFinitePressure {
                port: 2,
                ..
            }))
        ));
        p[2] = -5.0;
        assert!(matches!(
            solver.solve(&p, None),
            Err(ProbeError::Input(InputError::NonPositivePressure {
                port: 2,
                ..
            }))
        ));
        assert_eq!(
            solver.solve_slice(&[1.0e5; 7], None),
            Err(ProbeError::Input(InputError::PortCount {
                got: 7,
                expected: 5
            }))
        );
        assert!(matches!(
            solver.solve(&good, Some(-3.0)),
            Err(ProbeError::Input(InputError::Temperature { .. }))
        ));
        assert!(matches!(
            solver.solve(&good, Some(f64::NAN)),
            Err(ProbeError::Input(InputError::Temperature { .. }))
        ));
        let opts = SolveOptions {
            excluded: PortSet::EMPTY.with(9),
            start: None,
        };
        assert_eq!(
            solver.solve_with(&good, None, &opts),
            Err(ProbeError::Input(InputError::PortIndex {
                port: 9,
                ports: 5
            }))
        );
        let opts = SolveOptions {
            excluded: PortSet::EMPTY,
            start: Some(Start {
                velocity_unit: [0.0, 0.0, 0.0],
            }),
        };
        assert_eq!(
            solver.solve_with(&good, None, &opts),
            Err(ProbeError::Input(InputError::Start))
        );
        // An excluded port's reading is not looked at.
        let mut p = good;
        p[4] = f64::NAN;
        let opts = SolveOptions {
            excluded: PortSet::EMPTY.with(4),
            start: None,
        };
        assert!(solver.solve_with(&p, None, &opts).is_ok());
    }

    #[test]
    fn bad_config_is_typed() {
        let c = SolverConfig {
            max_iterations: 0,
            ..SolverConfig::default()
        };
        assert_eq!(
            ProbeSolver::new(five(1.0), AIR, c),
            Err(ProbeError::Config(ConfigError::MaxIterations))
        );
        let c = SolverConfig {
            false_alarm_probability: 0.0,
            ..SolverConfig::default()
        };
        assert!(matches!(
            ProbeSolver::new(five(1.0), AIR, c),
            Err(ProbeError::Config(
                ConfigError::FalseAlarmProbability { .. }
            ))
        ));
        let c = SolverConfig {
            usable_cone_rad: f64::NAN,
            ..SolverConfig::default()
        };
        assert!(ProbeSolver::new(five(1.0), AIR, c).is_err());
    }

    #[test]
    fn too_few_ports_cannot_tell() {
        let solver = ProbeSolver::new(five(1.0), AIR, SolverConfig::default()).unwrap();
        let opts = SolveOptions {
            excluded: PortSet::EMPTY.with(1).with(3),
            start: None,
        };
        assert_eq!(
            solver.solve_with(&[101_000.0; 5], None, &opts),
            Err(ProbeError::CannotTell(CannotTell::TooFewPorts {
                usable: 3,
                needed: 4
            }))
        );
        // Four ports: unique but untestable.
        let flow =
            FlowCondition::from_dynamic_pressure(&AIR, vel(10.0, 30.0), 101_325.0, 300.0).unwrap();
        let p = solver
            .model()
            .port_pressures(Regime::Incompressible, &flow)
            .unwrap();
        let opts = SolveOptions {
            excluded: PortSet::EMPTY.with(1),
            start: None,
        };
        let sol = solver.solve_with(&p, None, &opts).unwrap();
        assert_eq!(sol.fault, FaultReport::NotTestable);
        assert_eq!(sol.degrees_of_freedom, 0);
        assert!(angle(&sol.velocity_unit().unwrap(), flow.velocity_unit) < 1e-7);
    }

    #[test]
    fn low_flow_withholds_the_direction() {
        let solver = ProbeSolver::new(seven(2.0), AIR, SolverConfig::default()).unwrap();
        let mut rng = ChaCha8Rng::seed_from_u64(11);
        // q = 5 Pa with 2 Pa port noise: below 10 x noise floor.
        let flow =
            FlowCondition::from_dynamic_pressure(&AIR, vel(20.0, 0.0), 101_325.0, 5.0).unwrap();
        let mut p = solver
            .model()
            .port_pressures(Regime::Incompressible, &flow)
            .unwrap();
        for x in &mut p {
            *x += 2.0 * normal(&mut rng);
        }
        let sol = solver.solve(&p, None).unwrap();
        assert!(
            matches!(
                sol.direction,
                Direction::Invalid(DirectionInvalid::LowFlow { threshold_pa, .. })
                    if (threshold_pa - 20.0).abs() < 1e-9
            ),
            "{:?}",
            sol.direction
        );
        assert!(!sol.is_trustworthy());
        // Still air: all ports equal.
        let sol = solver.solve(&[100_000.0; 7], None).unwrap();
        assert!(matches!(
            sol.direction,
            Direction::Invalid(DirectionInvalid::LowFlow { .. })
        ));
        assert!((sol.static_pressure_pa - 100_000.0).abs() < 1e-6);
    }

    #[test]
    fn flow_from_outside_the_cone_is_reported() {
        let solver = ProbeSolver::new(seven(1.0), AIR, SolverConfig::default()).unwrap();
        // 80 deg off axis, and 100 deg (whose windward twin is at 80 deg).
        for theta in [80.0, 100.0, 95.0] {
            let flow =
                FlowCondition::from_dynamic_pressure(&AIR, vel(theta, 70.0), 101_325.0, 500.0)
                    .unwrap();
            let p = solver
                .model()
                .port_pressures(Regime::Incompressible, &flow)
                .unwrap();
            let sol = solver.solve(&p, None).unwrap();
            assert!(
                matches!(
                    sol.direction,
                    Direction::Invalid(DirectionInvalid::OutsideUsableCone { .. })
                ),
                "theta {theta}: {:?}",
                sol.direction
            );
        }
    }

    /// With a separated wake (the leeward ports sit at the separation
    /// pressure), flow from behind the head is never reported as a valid
    /// direction, whichever way the solver is started.
    #[test]
    fn flow_from_behind_is_not_a_confident_answer() {
        let config = SolverConfig {
            wake: WakeTreatment::Separated {
                separation_angle_rad: deg(110.0),
            },
            ..SolverConfig::default()
        };
        let solver = ProbeSolver::new(seven(2.0), AIR, config).unwrap();
        let mut rng = ChaCha8Rng::seed_from_u64(5);
        for (theta, phi) in [(180.0, 0.0), (150.0, 30.0), (130.0, 200.0), (120.0, 90.0)] {
            let flow =
                FlowCondition::from_dynamic_pressure(&AIR, vel(theta, phi), 101_325.0, 500.0)
                    .unwrap();
            let mut p = solver
                .model()
                .port_pressures(Regime::Incompressible, &flow)
                .unwrap();
            for x in &mut p {
                *x += 2.0 * normal(&mut rng);
            }
            match solver.solve(&p, None) {
                Ok(sol) => assert!(
                    !sol.is_trustworthy(),
                    "theta {theta}: {:?} {:?}",
                    sol.direction,
                    sol.fault
                ),
                Err(e) => assert!(matches!(e, ProbeError::CannotTell(_)), "{e:?}"),
            }
        }
        // Supersonic: flow from behind puts every port in the Newtonian
        // shadow, all reading static pressure: amplitude undeterminable.
        let solver = ProbeSolver::new(seven(2.0), AIR, SolverConfig::default()).unwrap();
        let flow = FlowCondition {
            velocity_unit: vel(180.0, 0.0),
            static_pressure_pa: 20_000.0,
            mach: 2.0,
        };
        let p = solver
            .model()
            .port_pressures(Regime::Supersonic, &flow)
            .unwrap();
        let r = solver.solve(&p, None);
        assert!(
            matches!(r, Err(ProbeError::CannotTell(_))) || r.is_ok_and(|s| !s.is_trustworthy()),
        );
    }

    #[test]
    fn windward_twin_is_reported_for_the_even_shape() {
        let solver = ProbeSolver::new(seven(1.0), AIR, SolverConfig::default()).unwrap();
        let v = vel(30.0, 10.0);
        let flow = FlowCondition::from_dynamic_pressure(&AIR, v, 101_325.0, 500.0).unwrap();
        let p = solver
            .model()
            .port_pressures(Regime::Incompressible, &flow)
            .unwrap();
        // Start the search from the mirror image (flow from behind).
        let opts = SolveOptions {
            excluded: PortSet::EMPTY,
            start: Some(Start {
                velocity_unit: [-v[0], -v[1], -v[2]],
            }),
        };
        let sol = solver.solve_with(&p, None, &opts).unwrap();
        assert!(angle(&sol.velocity_unit().unwrap(), v) < 1e-8);
    }

    #[test]
    fn a_bad_port_is_isolated_on_seven_ports_only_detected_on_five() {
        let mut rng = ChaCha8Rng::seed_from_u64(3);
        let seven_solver = ProbeSolver::new(seven(5.0), AIR, SolverConfig::default()).unwrap();
        let five_solver = ProbeSolver::new(five(5.0), AIR, SolverConfig::default()).unwrap();
        for (k, k5, theta, phi) in [
            (4usize, 1usize, 25.0, 100.0),
            (0, 2, 45.0, 200.0),
            (2, 3, 40.0, 80.0),
        ] {
            let flow =
                FlowCondition::from_dynamic_pressure(&AIR, vel(theta, phi), 101_325.0, 500.0)
                    .unwrap();
            let mut p = seven_solver
                .model()
                .port_pressures(Regime::Incompressible, &flow)
                .unwrap();
            for x in &mut p {
                *x += 5.0 * normal(&mut rng);
            }
            p[k] += 150.0; // a leak: 30 sigma
            let sol = seven_solver.solve(&p, None).unwrap();
            assert!(
                matches!(sol.fault, FaultReport::Isolated { port, .. } if port == k),
                "port {k}: {:?}",
                sol.fault
            );
            assert!(!sol.ports_used.contains(k));
            assert!(sol.is_trustworthy());
            assert!(angle(&sol.velocity_unit().unwrap(), flow.velocity_unit) < deg(2.0));
            // Without isolation: detected, not isolated, covariance inflated.
            let no_iso = ProbeSolver::new(
                seven(5.0),
                AIR,
                SolverConfig {
                    isolate_faults: false,
                    ..SolverConfig::default()
                },
            )
            .unwrap();
            let s2 = no_iso.solve(&p, None).unwrap();
            assert!(matches!(s2.fault, FaultReport::DetectedNotIsolated { .. }));
            assert!(!s2.is_trustworthy());

            let mut p5 = five_solver
                .model()
                .port_pressures(Regime::Incompressible, &flow)
                .unwrap();
            for x in &mut p5 {
                *x += 5.0 * normal(&mut rng);
            }
            p5[k5] += 400.0;
            let s5 = five_solver.solve(&p5, None).unwrap();
            assert!(
                matches!(s5.fault, FaultReport::DetectedNotIsolated { .. }),
                "5-port {k5}: {:?}",
                s5.fault
            );
            assert!(!s5.is_trustworthy());
        }
    }

    /// The reported 1-sigma values match the scatter of repeated noisy
    /// solves (Monte Carlo, fixed seed, 2000 trials: the sample standard
    /// deviation is within about 3 % of the truth at 1 sigma, so 12 % is a
    /// generous but still failing-when-wrong band).
    #[test]
    fn covariance_matches_the_scatter() {
        let sigma = 5.0;
        let solver = ProbeSolver::new(seven(sigma), AIR, SolverConfig::default()).unwrap();
        let v = vel(35.0, 50.0);
        let flow = FlowCondition::from_dynamic_pressure(&AIR, v, 101_325.0, 500.0).unwrap();
        let clean = solver
            .model()
            .port_pressures(Regime::Incompressible, &flow)
            .unwrap();
        let reported = solver.solve(&clean, Some(293.15)).unwrap();
        let mut rng = ChaCha8Rng::seed_from_u64(99);
        let (mut a2, mut q2, mut ps2, mut n) = (0.0, 0.0, 0.0, 0.0);
        let mut false_alarms = 0;
        for _ in 0..2000 {
            let mut p = clean;
            for x in &mut p {
                *x += sigma * normal(&mut rng);
            }
            let sol = solver.solve(&p, Some(293.15)).unwrap();
            let e = angle(&sol.velocity_unit().unwrap(), v);
            a2 += e * e;
            let dq = sol.dynamic_pressure_pa - 500.0;
            q2 += dq * dq;
            let dp = sol.static_pressure_pa - 101_325.0;
            ps2 += dp * dp;
            n += 1.0;
            if !matches!(sol.fault, FaultReport::Consistent { .. }) {
                false_alarms += 1;
            }
        }
        let ratio = |emp: f64, rep: f64| libm::sqrt(emp / n) / rep;
        let ra = ratio(a2, reported.sigma.angle_rad);
        let rq = ratio(q2, reported.sigma.dynamic_pressure_pa);
        let rp = ratio(ps2, reported.sigma.static_pressure_pa);
        assert!((ra - 1.0).abs() < 0.12, "angle {ra}");
        assert!((rq - 1.0).abs() < 0.12, "q {rq}");
        assert!((rp - 1.0).abs() < 0.12, "ps {rp}");
        // False-alarm rate 1e-3 configured: expect ~2 in 2000, allow 10.
        assert!(false_alarms <= 10, "{false_alarms} false alarms");
    }

    /// With every port windward, S_sphere = -5/4 + 9/4 S_newton: a
    /// supersonic flow's pressures are also those of a subsonic flow at
    /// another static pressure. The solution says so. With ports in the
    /// Newtonian shadow (flow 60 deg off axis, the far ring port at 100 deg)
    /// the shapes differ and the choice is made by the data.
    #[test]
    fn regime_ambiguity_is_reported() {
        let solver = ProbeSolver::new(seven(20.0), AIR, SolverConfig::default()).unwrap();
        let flow = FlowCondition {
            velocity_unit: vel(20.0, 30.0),
            static_pressure_pa: 20_000.0,
            mach: 1.8,
        };
        let p = solver
            .model()
            .port_pressures(Regime::Supersonic, &flow)
            .unwrap();
        let sol = solver.solve(&p, None).unwrap();
        assert_eq!(sol.regime, Regime::Supersonic);
        assert!(sol.regime_ambiguous);
        // The subsonic reading fits exactly as well.
        let sub = ProbeSolver::new(
            seven(20.0),
            AIR,
            SolverConfig {
                regime: RegimeChoice::Fixed(Regime::CompressibleSubsonic),
                ..SolverConfig::default()
            },
        )
        .unwrap()
        .solve(&p, None)
        .unwrap();
        assert!(sub.chi_square < 1e-12 && sub.mach < 1.0 && sub.mach > 0.59);
        assert!((sub.static_pressure_pa - 20_000.0).abs() > 1000.0);

        let flow = FlowCondition {
            velocity_unit: vel(60.0, 0.0),
            ..flow
        };
        let p = solver
            .model()
            .port_pressures(Regime::Supersonic, &flow)
            .unwrap();
        let sol = solver.solve(&p, None).unwrap();
        assert_eq!(sol.regime, Regime::Supersonic);
        assert!(!sol.regime_ambiguous);
        assert!((sol.mach - 1.8).abs() < 1e-6);
        // A fixed regime never claims ambiguity.
        assert!(!sub.regime_ambiguous);
    }

    #[test]
    fn hand_written_cholesky_matches_nalgebra() {
        let m = Matrix4::new(
            4.0, 1.0, 0.5, -0.2, 1.0, 3.0, 0.3, 0.1, 0.5, 0.3, 2.0, 0.4, -0.2, 0.1, 0.4, 1.5,
        );
        let b = Vector4::new(1.0, -2.0, 0.5, 3.0);
        let ours = Chol4::new(&m).unwrap();
        let theirs = m.cholesky().unwrap();
        assert!((ours.solve(&b) - theirs.solve(&b)).norm() < 1e-14);
        assert!((ours.inverse() - theirs.inverse()).norm() < 1e-14);
        let singular = Matrix4::from_diagonal(&Vector4::new(1.0, 1.0, 0.0, 1.0));
        assert!(Chol4::new(&singular).is_none());
    }

    #[test]
    fn iteration_cap_is_reported() {
        let solver = ProbeSolver::new(
            seven(1.0),
            AIR,
            SolverConfig {
                max_iterations: 1,
                ..SolverConfig::default()
            },
        )
        .unwrap();
        let flow =
            FlowCondition::from_dynamic_pressure(&AIR, vel(50.0, 30.0), 101_325.0, 500.0).unwrap();
        let p = solver
            .model()
            .port_pressures(Regime::Incompressible, &flow)
            .unwrap();
        // Started far off (the default start is exact for clean data).
        let opts = SolveOptions {
            excluded: PortSet::EMPTY,
            start: Some(Start {
                velocity_unit: vel(10.0, 250.0),
            }),
        };
        let sol = solver.solve_with(&p, None, &opts).unwrap();
        assert_eq!(sol.convergence, Convergence::IterationCap { iterations: 1 });
        assert_eq!(
            sol.direction,
            Direction::Invalid(DirectionInvalid::NotConverged)
        );
    }

    #[test]
    fn model_errors_are_typed() {
        let solver = ProbeSolver::new(seven(1.0), AIR, SolverConfig::default()).unwrap();
        let f = FlowCondition {
            velocity_unit: [-1.0, 0.0, 0.0],
            static_pressure_pa: -1.0,
            mach: 0.1,
        };
        assert!(matches!(
            solver.model().port_pressures(Regime::Incompressible, &f),
            Err(ProbeError::Model(ModelError::StaticPressure { .. }))
        ));
    }
}
