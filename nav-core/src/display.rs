//! `Display` for every error type of the core: what is wrong, where (the
//! field, port, module, sensor or contact index), and the value given.
//!
//! Kept in one module so the messages read alike; each type's variants are
//! documented where the type is defined.

use crate::body::{BodyConfigError, KinematicsError};
use crate::flow_window::FlowWindowError;
use crate::gas::GasError;
use crate::map::WallIndexError;
use crate::navigator::{ConfigError as NavConfigError, ConfigField};
use crate::num::RootError;
use crate::onboard::OnboardError;
use crate::probe::calib::CalError;
use crate::probe::chi2::Chi2Error;
use crate::probe::{
    CannotTell, ConfigError as ProbeConfigError, InputError, LayoutError, ModelError, ProbeError,
};
use crate::tactile::TactileError;
use crate::tactile::fit::FitError;
use core::fmt::{Display, Formatter, Result};

impl Display for RootError {
    fn fmt(&self, f: &mut Formatter<'_>) -> Result {
        match *self {
            Self::NotBracketed { lo, hi } => {
                write!(f, "root not bracketed: same sign at {lo} and {hi}")
            }
            Self::NonFinite { x } => write!(f, "function not finite at x = {x}"),
            Self::NoConvergence { iterations, width } => write!(
                f,
                "no convergence after {iterations} iterations (bracket width {width})"
            ),
        }
    }
}

impl Display for GasError {
    fn fmt(&self, f: &mut Formatter<'_>) -> Result {
        match *self {
            Self::InvalidGamma { gamma } => {
                write!(f, "gamma = {gamma}: must be finite and greater than 1")
            }
            Self::InvalidGasConstant { r_j_per_kg_k } => write!(
                f,
                "r_j_per_kg_k = {r_j_per_kg_k}: must be finite and positive"
            ),
            Self::MachOutOfRange { mach } => write!(f, "Mach {mach} outside the relation's domain"),
            Self::RatioOutOfRange { ratio } => {
                write!(f, "ratio {ratio} outside the range the inverse maps back")
            }
            Self::InvalidTemperature { temperature_k } => write!(
                f,
                "temperature_k = {temperature_k}: must be finite and positive"
            ),
            Self::Root(e) => write!(f, "gas inverse: {e}"),
        }
    }
}

impl Display for LayoutError {
    fn fmt(&self, f: &mut Formatter<'_>) -> Result {
        match *self {
            Self::PortCount { ports } => write!(
                f,
                "{ports} ports: a layout has {} to {}",
                crate::probe::MIN_PORTS,
                crate::probe::MAX_PORTS
            ),
            Self::ConeAngle { cone_angle_rad } => write!(
                f,
                "cone_angle_rad = {cone_angle_rad}: must lie in (0, pi/2)"
            ),
            Self::NonFiniteNormal { port } => write!(f, "port {port}: normal not finite"),
            Self::NotUnitNormal { port, norm } => {
                write!(f, "port {port}: normal of length {norm}, must be 1")
            }
            Self::DuplicateNormals { first, second } => {
                write!(f, "ports {first} and {second} look the same way")
            }
            Self::NotSpanning {
                smallest_eigenvalue,
            } => write!(
                f,
                "port normals do not span three dimensions (smallest eigenvalue {smallest_eigenvalue})"
            ),
            Self::Unresolvable => {
                write!(f, "even a head-on flow cannot be resolved (no tip port?)")
            }
            Self::Sigma { port, sigma_pa } => write!(
                f,
                "port {port}: sigma_pa = {sigma_pa}, must be finite and positive"
            ),
            Self::Bias { port, bias_pa } => {
                write!(f, "port {port}: bias_pa = {bias_pa}, must be finite")
            }
            Self::PortIndex { port, ports } => {
                write!(f, "port index {port} outside a {ports}-port layout")
            }
        }
    }
}

impl Display for ProbeConfigError {
    fn fmt(&self, f: &mut Formatter<'_>) -> Result {
        match *self {
            Self::MaxIterations => write!(f, "max_iterations must be at least 1"),
            Self::Tolerance { value } => {
                write!(f, "tolerance = {value}: must be finite and positive")
            }
            Self::UsableCone { value_rad } => {
                write!(f, "usable cone = {value_rad} rad: must lie in (0, pi)")
            }
            Self::LowFlowMultiple { value } => write!(
                f,
                "low-flow multiple = {value}: must be finite and non-negative"
            ),
            Self::FalseAlarmProbability { value } => {
                write!(f, "false-alarm probability = {value}: must lie in (0, 0.5]")
            }
            Self::RegimeMach {
                incompressible_below_mach,
                subsonic_up_to_mach,
            } => write!(
                f,
                "regime limits {incompressible_below_mach} and {subsonic_up_to_mach}: need 0 <= incompressible < subsonic < 1"
            ),
            Self::SeparationAngle { value_rad } => write!(
                f,
                "separation angle = {value_rad} rad: must lie in (pi/2, pi)"
            ),
            Self::ChiSquare(e) => write!(f, "chi-square threshold: {e}"),
        }
    }
}

impl Display for InputError {
    fn fmt(&self, f: &mut Formatter<'_>) -> Result {
        match *self {
            Self::NonFinitePressure { port, value_pa } => {
                write!(f, "port {port}: pressure {value_pa} Pa not finite")
            }
            Self::NonPositivePressure { port, value_pa } => write!(
                f,
                "port {port}: pressure {value_pa} Pa not positive (absolute pressures)"
            ),
            Self::PortCount { got, expected } => {
                write!(f, "{got} pressures for a {expected}-port layout")
            }
            Self::Temperature { value_k } => write!(
                f,
                "total temperature {value_k} K: must be finite and positive"
            ),
            Self::PortIndex { port, ports } => {
                write!(f, "port index {port} outside a {ports}-port layout")
            }
            Self::Start => write!(f, "starting point not finite or not a unit direction"),
        }
    }
}

impl Display for ModelError {
    fn fmt(&self, f: &mut Formatter<'_>) -> Result {
        match *self {
            Self::Direction => write!(f, "velocity direction not a finite unit vector"),
            Self::StaticPressure { value_pa } => write!(
                f,
                "static pressure {value_pa} Pa: must be finite and positive"
            ),
            Self::MachForRegime { regime, mach } => {
                write!(f, "Mach {mach} does not belong to the {regime:?} regime")
            }
            Self::NonPhysicalPressure { port, value_pa } => {
                write!(f, "port {port}: model pressure {value_pa} Pa not positive")
            }
        }
    }
}

impl Display for CannotTell {
    fn fmt(&self, f: &mut Formatter<'_>) -> Result {
        match *self {
            Self::TooFewPorts { usable, needed } => {
                write!(f, "{usable} usable ports, {needed} needed")
            }
            Self::NoAmplitude => write!(
                f,
                "static pressure and amplitude cannot be separated (flow from behind?)"
            ),
        }
    }
}

impl Display for Chi2Error {
    fn fmt(&self, f: &mut Formatter<'_>) -> Result {
        match *self {
            Self::DegreesOfFreedom { dof } => {
                write!(f, "{dof} degrees of freedom: at least 1 needed")
            }
            Self::Probability { p } => write!(f, "tail probability {p}: must lie in (0, 1)"),
            Self::Argument { a, x } => {
                write!(f, "incomplete gamma at a = {a}, x = {x}: out of range")
            }
            Self::NoConvergence => write!(f, "series hit its term cap"),
            Self::Root(e) => write!(f, "quantile search: {e}"),
        }
    }
}

impl Display for ProbeError {
    fn fmt(&self, f: &mut Formatter<'_>) -> Result {
        match self {
            Self::Layout(e) => write!(f, "probe layout: {e}"),
            Self::Config(e) => write!(f, "probe solver: {e}"),
            Self::Input(e) => write!(f, "probe input: {e}"),
            Self::CannotTell(e) => write!(f, "probe cannot tell: {e}"),
            Self::Gas(e) => write!(f, "probe gas: {e}"),
            Self::Model(e) => write!(f, "probe model: {e}"),
        }
    }
}

impl Display for CalError {
    fn fmt(&self, f: &mut Formatter<'_>) -> Result {
        match *self {
            Self::PortCount { got, expected } => {
                write!(f, "{got} pressures; the scheme needs {expected}")
            }
            Self::BadPressure { port } => {
                write!(f, "port {port}: pressure NaN, infinite, zero or negative")
            }
            Self::NoDynamicPressure { sector } => {
                write!(f, "sector {sector}: pseudo-dynamic pressure not positive")
            }
            Self::BadPoint { index } => write!(
                f,
                "table point {index}: not finite, sector out of range, or unsorted"
            ),
            Self::BadSample { index } => write!(
                f,
                "sweep sample {index}: direction or pressure not finite or not unit"
            ),
            Self::SparseSector {
                sector,
                points,
                needed,
            } => write!(
                f,
                "sector {sector}: {points} calibration points, {needed} needed"
            ),
            Self::Singular { sector } => {
                write!(f, "sector {sector}: neighbouring points are collinear")
            }
        }
    }
}

impl Display for BodyConfigError {
    fn fmt(&self, f: &mut Formatter<'_>) -> Result {
        match *self {
            Self::ModuleCount { count, capacity } => {
                write!(f, "module_count = {count}: must be 1 to {capacity}")
            }
            Self::ModuleLength { module, length_m } => write!(
                f,
                "modules[{module}].length_m = {length_m}: must be finite and positive"
            ),
            Self::ModuleRadius { module, radius_m } => write!(
                f,
                "modules[{module}].radius_m = {radius_m}: must be finite and positive"
            ),
            Self::SensorCount { count, capacity } => {
                write!(f, "sensor_count = {count}: at most {capacity}")
            }
            Self::SensorModule { sensor, module } => {
                write!(f, "sensors[{sensor}].module = {module}: no such module")
            }
            Self::SensorAxial {
                sensor,
                axial_m,
                length_m,
            } => write!(
                f,
                "sensors[{sensor}].axial_m = {axial_m}: must lie in [0, {length_m}] (the module length)"
            ),
            Self::SensorCap {
                sensor,
                module,
                polar_rad,
            } => write!(
                f,
                "sensors[{sensor}].polar_rad = {polar_rad}: a nose-cap sensor must sit on the head (module {module} given) at a polar angle in [0, pi/2]"
            ),
            Self::SensorAngle { sensor, angle_rad } => write!(
                f,
                "sensors[{sensor}].angle_rad = {angle_rad}: must be finite"
            ),
            Self::JointSigma { joint_sigma_rad } => write!(
                f,
                "joint_sigma_rad = {joint_sigma_rad}: must be finite and >= 0"
            ),
        }
    }
}

impl Display for KinematicsError {
    fn fmt(&self, f: &mut Formatter<'_>) -> Result {
        match *self {
            Self::PoseNotFinite => write!(f, "head pose: a component is not finite"),
            Self::QuaternionNotUnit { norm } => {
                write!(f, "head pose: quaternion norm {norm}, must be 1")
            }
            Self::PoseSigma {
                position_sigma_m,
                attitude_sigma_rad,
            } => write!(
                f,
                "head pose: sigmas {position_sigma_m} m, {attitude_sigma_rad} rad must be finite and >= 0"
            ),
            Self::TooFewJoints { needed, given } => {
                write!(f, "{given} joints given, {needed} needed")
            }
            Self::JointNotFinite { joint } => write!(f, "joints[{joint}]: angle not finite"),
        }
    }
}

impl Display for FitError {
    fn fmt(&self, f: &mut Formatter<'_>) -> Result {
        match *self {
            Self::TooFewPoints { given, needed } => {
                write!(f, "{given} points, {needed} needed")
            }
            Self::NonFinite { index } => write!(f, "point {index}: coordinate not finite"),
            Self::Coincident => write!(f, "all points coincide"),
            Self::Collinear => write!(f, "the points lie on a line"),
            Self::NoSolution => write!(f, "constraint root or eigenvector not found"),
            Self::NotEllipse => write!(f, "the fitted conic is not an ellipse"),
        }
    }
}

impl Display for TactileError {
    fn fmt(&self, f: &mut Formatter<'_>) -> Result {
        match *self {
            Self::InvalidConfig { field, value } => {
                write!(f, "tactile.{field} = {value}: out of range")
            }
            Self::TimeNotFinite { time_s } => write!(f, "frame time_s = {time_s}: not finite"),
            Self::TimeOutOfOrder {
                time_s,
                last_time_s,
            } => write!(
                f,
                "frame time_s = {time_s}: earlier than the last ingested {last_time_s}"
            ),
            Self::ContactCount { count, capacity } => {
                write!(f, "contact_count = {count}: the frame has {capacity} slots")
            }
            Self::ContactModule {
                contact,
                module,
                module_count,
            } => write!(
                f,
                "contacts[{contact}].module = {module}: the body has {module_count} modules"
            ),
            Self::ContactSensor {
                contact,
                module,
                sensor,
                sensors_on_module,
            } => write!(
                f,
                "contacts[{contact}].sensor = {sensor}: module {module} has {sensors_on_module} sensors"
            ),
            Self::ContactForce { contact, force_n } => write!(
                f,
                "contacts[{contact}].force_n = {force_n}: must be finite and >= 0"
            ),
            Self::ContactNormal { contact } => write!(
                f,
                "contacts[{contact}].normal_module: not finite or not unit length"
            ),
            Self::Kinematics(e) => write!(f, "{e}"),
        }
    }
}

impl Display for WallIndexError {
    fn fmt(&self, f: &mut Formatter<'_>) -> Result {
        match self {
            Self::NonFinite => write!(f, "wall point coordinate not finite"),
            Self::ZeroCapacity => write!(f, "wall index has zero capacity"),
        }
    }
}

impl ConfigField {
    /// The configuration path of the field (`"decide.robot_radius_m"`).
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Self::RobotRadius => "decide.robot_radius_m",
            Self::StandoffMargin => "decide.standoff_margin_m",
            Self::WidthMargin => "decide.width_margin_m",
            Self::Speeds => "decide.cruise_speed_m_per_s",
            Self::SlowBand => "decide.slow_band_m",
            Self::ThroatLookahead => "decide.throat_lookahead_m",
            Self::CentringGain => "decide.centring_gain",
            Self::MinDynamicPressure => "decide.min_dynamic_pressure_pa",
            Self::LostFlowTime => "decide.lost_flow_s",
            Self::MinBranchFlux => "decide.min_branch_flux_kg_per_s",
            Self::Hysteresis => "decide.branch_hysteresis_frac",
            Self::MinBranchSamples => "decide.min_branch_samples",
            Self::SampleTimeout => "decide.sample_timeout_s",
            Self::SampleAlign => "decide.sample_align_rad",
            Self::JunctionRadius => "decide.junction_radius_m",
            Self::Divergence => "decide.divergence_rad",
            Self::ContinuityTolerance => "decide.continuity_tolerance",
            Self::Arrive => "decide.arrive_m",
            Self::CameFrom => "decide.came_from_cos",
            Self::HealthCounts => "health (counts)",
            Self::HealthTimes => "health (times)",
            Self::FilterNoise => "filter noise",
            Self::Ridge => "ridge",
            Self::FlowTurn => "flow_turn",
            Self::StationSpacing => "station_spacing_m",
            Self::FrameTiming => "reorder_window_s / pose_timeout_s",
            Self::PoseLimits => "pose_limits",
            Self::TouchSpeed => "decide.skin_compliance_m / decide.sensing_latency_s",
            Self::Stall => "decide.stall_distance_m / decide.stall_fraction",
            Self::Capacity => "capacity (const generic)",
        }
    }
}

impl Display for NavConfigError {
    fn fmt(&self, f: &mut Formatter<'_>) -> Result {
        if self.field == ConfigField::Capacity {
            return write!(
                f,
                "capacity: P <= 32, C <= 64, and S, W, JN non-zero (JN <= 65535)"
            );
        }
        write!(f, "{} = {}: out of range", self.field.name(), self.value)
    }
}

impl Display for FlowWindowError {
    fn fmt(&self, f: &mut Formatter<'_>) -> Result {
        match self {
            Self::Config { field, value } => write!(f, "{field} = {value}: out of range"),
            Self::TimeOrder { time_s, last_s } => write!(
                f,
                "frame time {time_s} s is not finite or not after the last one ({last_s} s)"
            ),
            Self::Pose => write!(f, "pose not finite or its quaternion degenerate"),
            Self::Density { value } => {
                write!(f, "gas density {value} kg/m^3 is not finite and positive")
            }
        }
    }
}

impl Display for OnboardError {
    fn fmt(&self, f: &mut Formatter<'_>) -> Result {
        match self {
            Self::Body(e) => write!(f, "body: {e}"),
            Self::Probe(e) => write!(f, "{e}"),
            Self::Tactile(e) => write!(f, "tactile: {e}"),
            Self::Nav(e) => write!(f, "navigator: {e}"),
            Self::Setting { field, value } => write!(f, "{field} = {value}: out of range"),
            Self::FlowWindow(e) => write!(f, "flow window: {e}"),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use core::fmt::Write;

    /// A small no-alloc buffer for formatting in tests.
    struct Buf {
        b: [u8; 256],
        n: usize,
    }
    impl Write for Buf {
        fn write_str(&mut self, s: &str) -> Result {
            let end = self.n + s.len();
            self.b
                .get_mut(self.n..end)
                .ok_or(core::fmt::Error)?
                .copy_from_slice(s.as_bytes());
            self.n = end;
            Ok(())
        }
    }
    fn text(d: &dyn Display) -> Buf {
        let mut b = Buf { b: [0; 256], n: 0 };
        write!(b, "{d}").unwrap();
        b
    }
    fn s(b: &Buf) -> &str {
        core::str::from_utf8(&b.b[..b.n]).unwrap()
    }

    #[test]
    fn messages_name_the_field_and_value() {
        let e = OnboardError::Body(BodyConfigError::ModuleRadius {
            module: 2,
            radius_m: -0.5,
        });
        let t = text(&e);
        assert_eq!(
            s(&t),
            "body: modules[2].radius_m = -0.5: must be finite and positive"
        );
        let e = OnboardError::Setting {
            field: "throat_stations",
            value: 9.0,
        };
        let t = text(&e);
        assert_eq!(s(&t), "throat_stations = 9: out of range");
        let e = OnboardError::Nav(NavConfigError {
            field: ConfigField::MinDynamicPressure,
            value: -1.0,
        });
        let t = text(&e);
        assert_eq!(
            s(&t),
            "navigator: decide.min_dynamic_pressure_pa = -1: out of range"
        );
        let e = ProbeError::Layout(LayoutError::NotUnitNormal { port: 3, norm: 2.0 });
        let t = text(&e);
        assert_eq!(s(&t), "probe layout: port 3: normal of length 2, must be 1");
        let e = OnboardError::FlowWindow(FlowWindowError::Config {
            field: "half_life_s",
            value: -2.0,
        });
        let t = text(&e);
        assert_eq!(s(&t), "flow window: half_life_s = -2: out of range");
    }
}
