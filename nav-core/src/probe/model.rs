//! Forward models: port pressures from a known flow.
//!
//! Every regime gives port `i` the surface pressure
//!
//! `p_i = p_s + A * S(c_i)`, with `c_i = cos theta_i = -n_i . v_hat`,
//!
//! where `p_s` is the free-stream static pressure, `A` the regime's
//! pressure amplitude and `S` its surface shape:
//!
//! | regime | amplitude `A` | shape `S(c)` | source |
//! |---|---|---|---|
//! | [`Regime::Incompressible`] | dynamic pressure `q = rho V^2 / 2` | `Cp = 1 - (9/4) sin^2 theta = -5/4 + (9/4) c^2` | potential flow over a sphere: Anderson, *Fundamentals of Aerodynamics*, the sphere section (section 6.4 in the editions we recall; section number recalled, not checked) |
//! | [`Regime::CompressibleSubsonic`] | impact pressure `p0 - p_s`, `p0/p_s` isentropic (NACA Report 1135, eq. 44) | the same sphere shape | see below |
//! | [`Regime::Supersonic`] | pitot minus static `p02 - p_s`, `p02/p_s` from the Rayleigh pitot formula (NACA Report 1135, eq. 100) | modified Newtonian, `Cp = Cp_max cos^2 theta`, i.e. `S = c^2` for `c > 0`, `0` in the shadow `c <= 0` | Lees (1955), modified Newtonian theory (citation details recalled); `Cp_max = (p02 - p_s)/q` |
//!
//! Compressible subsonic surface treatment: the stagnation pressure is exact
//! (isentropic compression to rest, NACA 1135 eq. 44), and the surface
//! distribution keeps the incompressible sphere shape scaled by the impact
//! pressure `p0 - p_s` instead of `q`. As `M -> 0`, `p0 - p_s -> q` and the
//! model becomes the incompressible one; at the stagnation port it is exact
//! at every subsonic Mach. What it neglects is the compressibility change of
//! the shape itself (the Janzen-Rayleigh / Prandtl-Glauert-type corrections,
//! which steepen the suction peak); normalising probe coefficients by the
//! impact pressure is common practice in compressible multi-hole probe
//! calibration, and a calibration table absorbs the remainder. The shape is
//! unphysical beyond the sphere's critical Mach number (local sonic flow at
//! the shoulder, near M = 0.6 for a sphere, a recalled figure); near Mach 1
//! the model can even produce negative absolute pressures, which
//! [`ProbeModel::port_pressures`] refuses with
//! [`ModelError::NonPhysicalPressure`].
//!
//! Supersonic: a detached normal shock stands ahead of the blunt head; the
//! stagnation streamline crosses it normally, so the stagnation port reads
//! the Rayleigh pitot pressure `p02`, and the other ports follow modified
//! Newtonian theory referenced to the free-stream static pressure (Lees
//! 1955; see also Anderson, *Hypersonic and High-Temperature Gas Dynamics*,
//! the Newtonian chapter, recalled). Ports in the shadow (`theta >= 90 deg`)
//! read `p_s` (Newtonian `Cp = 0`).
//!
//! # Wake treatment (subsonic regimes)
//! Potential flow is even in the flow direction: the pressures of flow
//! `v_hat` and of flow `-v_hat` are identical, so with
//! [`WakeTreatment::Attached`] (the project convention, the default) a flow
//! from behind the head cannot be told from a flow from the front by port
//! pressures alone. A real sphere's boundary layer separates (near 80 deg
//! subcritical, later when turbulent: Achenbach 1972, J. Fluid Mech. 54,
//! recalled) and the pressure behind it stays roughly constant.
//! [`WakeTreatment::Separated`] models that crudely: past the separation
//! angle the port keeps the shape value at separation. This is our
//! simplification (continuous, not smooth), there to let the solver tell
//! front from back when the real head behaves that way.

use nalgebra::Vector3;

use super::layout::ProbeLayout;
use super::{ConfigError, ModelError, ProbeError};
use crate::gas::IdealGas;

/// Which forward model applies.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Regime {
    /// Low Mach number, constant density: sphere potential flow with `q`.
    Incompressible,
    /// Subsonic with compressibility: isentropic stagnation pressure and the
    /// sphere shape scaled by the impact pressure.
    CompressibleSubsonic,
    /// Supersonic: bow shock, Rayleigh pitot at the stagnation port,
    /// modified Newtonian elsewhere.
    Supersonic,
}

/// What leeward ports see in the subsonic regimes (see the module notes).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum WakeTreatment {
    /// Potential flow all round (project convention).
    Attached,
    /// Beyond `separation_angle_rad` (in (90, 180) deg) the pressure stays at
    /// its value at separation.
    Separated {
        /// Incidence angle where the boundary layer leaves the surface, rad.
        separation_angle_rad: f64,
    },
}

impl WakeTreatment {
    pub(crate) fn check(self) -> Result<(), ConfigError> {
        match self {
            Self::Attached => Ok(()),
            Self::Separated {
                separation_angle_rad: a,
            } => {
                if a.is_finite() && a > 0.5 * core::f64::consts::PI && a < core::f64::consts::PI {
                    Ok(())
                } else {
                    Err(ConfigError::SeparationAngle { value_rad: a })
                }
            }
        }
    }
}

/// The surface shape of a regime, with its derivative in `c = cos theta`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum Shape {
    /// Sphere potential flow, `-5/4 + 9/4 max(c, c_sep)^2`; `c_sep = -1`
    /// when attached all round.
    Sphere { c_sep: f64 },
    /// Modified Newtonian, `max(c, 0)^2`.
    Newtonian,
}

impl Shape {
    pub(crate) fn for_regime(regime: Regime, wake: WakeTreatment) -> Self {
        match regime {
            Regime::Supersonic => Self::Newtonian,
            Regime::Incompressible | Regime::CompressibleSubsonic => match wake {
                WakeTreatment::Attached => Self::Sphere { c_sep: -1.0 },
                WakeTreatment::Separated {
                    separation_angle_rad,
                } => Self::Sphere {
                    c_sep: libm::cos(separation_angle_rad),
                },
            },
        }
    }

    /// `(S(c), dS/dc)`.
    #[inline]
    pub(crate) fn eval(self, c: f64) -> (f64, f64) {
        match self {
            Self::Sphere { c_sep } => {
                if c > c_sep {
                    (-1.25 + 2.25 * c * c, 4.5 * c)
                } else {
                    (-1.25 + 2.25 * c_sep * c_sep, 0.0)
                }
            }
            Self::Newtonian => {
                if c > 0.0 {
                    (c * c, 2.0 * c)
                } else {
                    (0.0, 0.0)
                }
            }
        }
    }

    /// Whether `S(c) = S(-c)` for all `c` (so `d` and `-d` fit equally).
    pub(crate) fn is_even(self) -> bool {
        matches!(self, Self::Sphere { c_sep } if c_sep <= -1.0)
    }
}

/// Pressure amplitude `A` of a regime at Mach `mach` and static pressure
/// `static_pa` (see the module table).
///
/// # Errors
/// [`ModelError::MachForRegime`] when the Mach number does not belong to the
/// regime; [`ProbeError::Gas`] if a gas relation fails.
pub fn amplitude_pa(
    gas: &IdealGas,
    regime: Regime,
    static_pa: f64,
    mach: f64,
) -> Result<f64, ProbeError> {
    let bad = ModelError::MachForRegime { regime, mach };
    match regime {
        Regime::Incompressible => Ok(gas.dynamic_pressure_pa(static_pa, mach)?),
        Regime::CompressibleSubsonic => {
            if mach.is_nan() || mach >= 1.0 {
                return Err(bad.into());
            }
            Ok(static_pa * (gas.p0_over_p(mach)? - 1.0))
        }
        Regime::Supersonic => {
            if mach.is_nan() || mach < 1.0 {
                return Err(bad.into());
            }
            Ok(static_pa * (gas.rayleigh_pitot_p02_over_p1(mach)? - 1.0))
        }
    }
}

/// A known flow at the probe.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FlowCondition {
    /// Unit vector along which the gas moves, probe frame.
    pub velocity_unit: [f64; 3],
    /// Free-stream static pressure, Pa (absolute).
    pub static_pressure_pa: f64,
    /// Free-stream Mach number.
    pub mach: f64,
}

impl FlowCondition {
    /// The flow with dynamic pressure `q_pa = gamma/2 p M^2`.
    ///
    /// # Errors
    /// [`ModelError::StaticPressure`] unless `static_pressure_pa` is finite
    /// and positive; [`ProbeError::Gas`] (`MachOutOfRange`) for a negative
    /// or non-finite `q_pa`.
    pub fn from_dynamic_pressure(
        gas: &IdealGas,
        velocity_unit: [f64; 3],
        static_pressure_pa: f64,
        q_pa: f64,
    ) -> Result<Self, ProbeError> {
        if !(static_pressure_pa.is_finite() && static_pressure_pa > 0.0) {
            return Err(ModelError::StaticPressure {
                value_pa: static_pressure_pa,
            }
            .into());
        }
        let m2 = 2.0 * q_pa / (gas.gamma() * static_pressure_pa);
        if !(m2.is_finite() && m2 >= 0.0) {
            return Err(ProbeError::Gas(crate::gas::GasError::MachOutOfRange {
                mach: m2,
            }));
        }
        Ok(Self {
            velocity_unit,
            static_pressure_pa,
            mach: libm::sqrt(m2),
        })
    }
}

/// A forward model: layout, gas and wake treatment.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ProbeModel<const N: usize> {
    layout: ProbeLayout<N>,
    gas: IdealGas,
    wake: WakeTreatment,
}

impl<const N: usize> ProbeModel<N> {
    /// A model of `layout` in `gas`.
    ///
    /// # Errors
    /// [`ConfigError::SeparationAngle`] for a bad wake setting.
    pub fn new(
        layout: ProbeLayout<N>,
        gas: IdealGas,
        wake: WakeTreatment,
    ) -> Result<Self, ProbeError> {
        wake.check()?;
        Ok(Self { layout, gas, wake })
    }

    /// The layout.
    #[must_use]
    pub const fn layout(&self) -> &ProbeLayout<N> {
        &self.layout
    }

    /// The gas.
    #[must_use]
    pub const fn gas(&self) -> &IdealGas {
        &self.gas
    }

    /// The wake treatment.
    #[must_use]
    pub const fn wake(&self) -> WakeTreatment {
        self.wake
    }

    /// Surface pressure at every port, Pa (absolute, no bias, no noise).
    /// A reading is this plus the port's `bias_pa` plus noise.
    ///
    /// # Errors
    /// [`ModelError::Direction`] unless `velocity_unit` is a finite unit
    /// vector (within 1e-9); [`ModelError::StaticPressure`];
    /// [`ModelError::MachForRegime`]; [`ModelError::NonPhysicalPressure`]
    /// when a port would see zero or negative absolute pressure.
    pub fn port_pressures(
        &self,
        regime: Regime,
        flow: &FlowCondition,
    ) -> Result<[f64; N], ProbeError> {
        let [vx, vy, vz] = flow.velocity_unit;
        let v = Vector3::new(vx, vy, vz);
        let norm = v.norm();
        if !(norm.is_finite() && libm::fabs(norm - 1.0) <= super::layout::UNIT_TOLERANCE) {
            return Err(ModelError::Direction.into());
        }
        let ps = flow.static_pressure_pa;
        if !(ps.is_finite() && ps > 0.0) {
            return Err(ModelError::StaticPressure { value_pa: ps }.into());
        }
        if !(flow.mach.is_finite() && flow.mach >= 0.0) {
            return Err(ModelError::MachForRegime {
                regime,
                mach: flow.mach,
            }
            .into());
        }
        let a = amplitude_pa(&self.gas, regime, ps, flow.mach)?;
        let shape = Shape::for_regime(regime, self.wake);
        let d = -v;
        let mut out = [0.0; N];
        for (port, (p, n)) in out.iter_mut().zip(self.layout.normals().iter()).enumerate() {
            let (s, _) = shape.eval(n.dot(&d));
            *p = ps + a * s;
            if p.is_nan() || *p <= 0.0 {
                return Err(ModelError::NonPhysicalPressure { port, value_pa: *p }.into());
            }
        }
        Ok(out)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::probe::deg;

    /// Anderson, *Fundamentals of Aerodynamics*, flow over a sphere
    /// (section 6.4 as recalled): Cp = 1 - (9/4) sin^2 theta, which is 1 at
    /// the stagnation point, 0 at theta = asin(2/3) = 41.81 deg and -1.25 at
    /// theta = 90 deg (the values the textbook states).
    #[test]
    fn sphere_shape_matches_anderson() {
        let s = Shape::for_regime(Regime::Incompressible, WakeTreatment::Attached);
        let cp = |theta_deg: f64| s.eval(libm::cos(deg(theta_deg))).0;
        assert!((cp(0.0) - 1.0).abs() < 1e-15);
        assert!((cp(90.0) + 1.25).abs() < 1e-15);
        // Zero crossing at 41.81 deg (to the textbook's two decimals).
        assert!(cp(41.80) > 0.0 && cp(41.82) < 0.0);
        let root = libm::asin(2.0 / 3.0);
        assert!(cp(root.to_degrees()).abs() < 1e-14);
        assert_eq!(std::format!("{:.2}", root.to_degrees()), "41.81");
        // Fore-aft symmetric (potential flow).
        assert!((cp(30.0) - cp(150.0)).abs() < 1e-14);
        // The derivative is that of the formula: dCp/dc = 9/2 c.
        let c = 0.3;
        let h = 1e-6;
        let fd = (s.eval(c + h).0 - s.eval(c - h).0) / (2.0 * h);
        assert!((fd - s.eval(c).1).abs() < 1e-8);
    }

    #[test]
    fn newtonian_shape() {
        let s = Shape::Newtonian;
        assert_eq!(s.eval(1.0), (1.0, 2.0));
        assert_eq!(s.eval(-0.5), (0.0, 0.0));
        // Lees: Cp / Cp_max = cos^2 theta.
        let c = libm::cos(deg(30.0));
        assert!((s.eval(c).0 - 0.75).abs() < 1e-15);
    }

    #[test]
    fn stagnation_port_sees_the_regime_pressure() {
        let layout = ProbeLayout::seven_port(deg(40.0), 1.0).unwrap();
        let gas = IdealGas::DRY_AIR;
        let m = ProbeModel::new(layout, gas, WakeTreatment::Attached).unwrap();
        let ps = 50_000.0;
        for (regime, mach, ratio) in [
            (
                Regime::CompressibleSubsonic,
                0.5,
                gas.p0_over_p(0.5).unwrap(),
            ),
            (
                Regime::Supersonic,
                2.0,
                gas.rayleigh_pitot_p02_over_p1(2.0).unwrap(),
            ),
        ] {
            let f = FlowCondition {
                velocity_unit: [-1.0, 0.0, 0.0],
                static_pressure_pa: ps,
                mach,
            };
            let p = m.port_pressures(regime, &f).unwrap();
            assert!((p[0] / ps - ratio).abs() < 1e-13, "{regime:?}");
        }
        // Mach 2 with NACA 1135 eq. 100: p02/p1 = 5.6404 (value computed
        // from the published formula, see gas tests).
        let f = FlowCondition {
            velocity_unit: [-1.0, 0.0, 0.0],
            static_pressure_pa: ps,
            mach: 2.0,
        };
        let p = m.port_pressures(Regime::Supersonic, &f).unwrap();
        assert!((p[0] / ps - 5.6404).abs() < 5e-5);
        // Ring ports at 40 deg incidence: Newtonian cos^2 40.
        let c2 = libm::cos(deg(40.0)) * libm::cos(deg(40.0));
        assert!(((p[3] - ps) / (p[0] - ps) - c2).abs() < 1e-13);
    }

    #[test]
    fn model_refuses_bad_flows() {
        let layout = ProbeLayout::five_port(deg(45.0), 1.0).unwrap();
        let m = ProbeModel::new(layout, IdealGas::DRY_AIR, WakeTreatment::Attached).unwrap();
        let mut f = FlowCondition {
            velocity_unit: [-1.0, 0.0, 0.0],
            static_pressure_pa: 1e5,
            mach: 0.5,
        };
        assert!(matches!(
            m.port_pressures(Regime::Supersonic, &f),
            Err(ProbeError::Model(ModelError::MachForRegime { .. }))
        ));
        f.mach = 0.99;
        // Flow 50 deg off axis: the port at azimuth 180 deg sees 95 deg.
        let a = deg(50.0);
        f.velocity_unit = [-libm::cos(a), -libm::sin(a), 0.0];
        assert!(matches!(
            m.port_pressures(Regime::CompressibleSubsonic, &f),
            Err(ProbeError::Model(ModelError::NonPhysicalPressure { .. }))
        ));
        f.velocity_unit = [-1.0, 0.1, 0.0];
        assert_eq!(
            m.port_pressures(Regime::Incompressible, &f),
            Err(ProbeError::Model(ModelError::Direction))
        );
        assert!(
            ProbeModel::new(
                layout,
                IdealGas::DRY_AIR,
                WakeTreatment::Separated {
                    separation_angle_rad: deg(60.0)
                }
            )
            .is_err()
        );
    }
}
