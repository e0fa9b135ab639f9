//! Synthetic sensor-frame sequences for the frame-level navigator
//! (`nav_core::onboard::FrameNavigator`): the `onboard` integration tests,
//! the determinism workload, nav-core's `step_cost` example and its
//! `frame_step` bench (included there with `#[path]`, together with
//! `nav_scene.rs`, whose [`Rigid`] and quaternion helpers it uses). Depends
//! only on `nav_core`, `libm` and `rand_chacha`, and never allocates.
//!
//! Invented scene (our own, for tests and figures only):
//! - A circular conduit whose axis, in the scene's own frame, is
//!   `a(x) = (x, Y sin(2 pi x / lambda), g x)`: a gentle horizontal wiggle
//!   and a slight climb. Its radius narrows linearly from `radius_start_m`
//!   to `radius_end_m` over `narrowing_length_m` and then stays. An
//!   optional straight side branch leaves the axis at `x = at_x_m`, angled
//!   forward, and leaves a hole in the wall where it meets it.
//! - Gas flows down the conduit (toward -x); the robot travels up it (+x).
//!   Dynamic pressure follows continuity for an incompressible gas,
//!   `q ~ (mdot / A)^2`; upstream of the branch the trunk carries
//!   `1 - flow_share` of the mass flow; near the mouth the gas leaving the
//!   branch tilts the trunk flow away from the mouth.
//! - The robot: 8 cylindrical modules (0.15 m long, radius 0.04 m), four
//!   contact pads per module at mid-length at 0, 90, 180 and 270 deg
//!   (sensor 3, the belly pad, at 270 deg), a 7-port probe with a 40 deg
//!   cone on the head.
//! - The gait: the body lies along the wall, its belly pads pressed into
//!   it by `squeeze_m` (compliant pads), and the whole body rocks around
//!   the conduit axis, `phi(t) = centre + amplitude sin(2 pi t / period)`
//!   (plane angle from "left" toward "up"; -90 deg is the floor). Every so
//!   often the head lifts off the wall to the conduit axis and back. The
//!   head pose comes from the known path; the body follows the head along
//!   the pressed line (each module a chord of it, joint yaw / pitch from
//!   consecutive module axes, body conventions of `nav_core::body`).
//!   With `pressed == false` the body rides on the axis and touches
//!   nothing.
//! - Contacts: every pad whose skin point lies beyond the wall (and not
//!   over the branch hole) touches, with force `pad_stiffness * depth`.
//!   The skin reports the pads that touch, and the belly pads the gait
//!   presses even when they feel nothing (a pressed pad over a hole is
//!   news: free space where wall should be).
//! - Port pressures: `ProbeModel::port_pressures` (incompressible sphere
//!   model) of the true flow in the probe frame, plus Gaussian noise
//!   (seeded ChaCha8, Box-Muller with `libm`).
#![allow(dead_code)]

use crate::nav_scene::{Rigid, qmul, rotate};
use nav_core::body::{BodyConfig, ModuleSpec, SensorSpec};
use nav_core::frame::{Contact, HeadPose, JointAngles, SensorFrame};
use nav_core::gas::IdealGas;
use nav_core::map::{add, dot, norm, reject, scale, sub, unit};
use nav_core::onboard::{FrameNavigator, OnboardConfig};
use nav_core::probe::{FlowCondition, ProbeLayout, ProbeModel, Regime, WakeTreatment, deg};
use rand_chacha::ChaCha8Rng;
use rand_chacha::rand_core::{RngCore, SeedableRng};

/// Probe ports.
pub const PORTS: usize = 7;
/// Modules of the robot.
pub const MODULES: usize = 8;
/// Joints between them.
pub const JOINTS: usize = MODULES - 1;
/// Contact pads per module.
pub const PADS_PER_MODULE: usize = 4;
/// Contact pads in all.
pub const SENSORS: usize = MODULES * PADS_PER_MODULE;
/// Index, on each module, of the belly pad (270 deg).
pub const BELLY_PAD: u16 = 3;

/// The frame navigator the step-cost example and the frame-step bench
/// measure: 7 ports, 7 joints, 32 contact slots, 8 modules, 32 pads, 111
/// tactile points, 128 stations, 256 wall-index points, 8 junctions (the
/// standard 256 tactile and 512 wall-index points do not fit in 64 KiB).
pub type CostFrameNavigator = FrameNavigator<7, 7, 32, 8, 32, 111, 128, 256, 8>;

/// Robot geometry.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Robot {
    /// Module length, m.
    pub module_length_m: f64,
    /// Module radius, m.
    pub module_radius_m: f64,
    /// Pads sit this far behind each module's front face, m.
    pub pad_axial_m: f64,
    /// 1-sigma joint-angle uncertainty the body reports, rad.
    pub joint_sigma_rad: f64,
}

impl Robot {
    /// The demo robot.
    pub const DEMO: Self = Self {
        module_length_m: 0.15,
        module_radius_m: 0.04,
        pad_axial_m: 0.075,
        joint_sigma_rad: 0.002,
    };

    /// Angle of pad `j` around the module axis, rad.
    pub fn pad_angle_rad(j: usize) -> f64 {
        f64::from(u32::try_from(j).unwrap_or(0)) * core::f64::consts::FRAC_PI_2
    }

    /// The body configuration (capacities `M >= 8`, `S >= 32`).
    pub fn body_config<const M: usize, const S: usize>(&self) -> BodyConfig<M, S> {
        let mut cfg = BodyConfig::<M, S>::uniform(
            MODULES,
            ModuleSpec {
                length_m: self.module_length_m,
                radius_m: self.module_radius_m,
            },
        );
        for m in 0..MODULES {
            for j in 0..PADS_PER_MODULE {
                cfg.push_sensor(SensorSpec {
                    module: u16::try_from(m).unwrap_or(0),
                    axial_m: self.pad_axial_m,
                    angle_rad: Self::pad_angle_rad(j),
                    cap_polar_rad: None,
                });
            }
        }
        cfg.joint_sigma_rad = self.joint_sigma_rad;
        cfg
    }
}

/// A straight side branch.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SideBranch {
    /// Where it leaves the trunk axis (scene x), m.
    pub at_x_m: f64,
    /// Angle between the branch axis and the trunk axis (upstream), rad.
    pub angle_from_axis_rad: f64,
    /// Side it leaves toward: plane angle from "left" toward "up", rad.
    pub side_rad: f64,
    /// Radius, m.
    pub radius_m: f64,
    /// Length, m.
    pub length_m: f64,
    /// Share of the downstream trunk's mass flow that comes from it.
    pub flow_share: f64,
}

/// The conduit, in the scene frame.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Conduit {
    /// Lateral wiggle amplitude `Y`, m.
    pub wiggle_amplitude_m: f64,
    /// Wiggle period `lambda`, m (> 0).
    pub wiggle_period_m: f64,
    /// Climb `g`: rise per metre of x.
    pub climb: f64,
    /// Radius at x <= 0, m.
    pub radius_start_m: f64,
    /// Radius from `narrowing_length_m` on, m.
    pub radius_end_m: f64,
    /// Length of the narrowing, m (> 0).
    pub narrowing_length_m: f64,
    /// Dynamic pressure at x = 0 (downstream of any branch), Pa.
    pub dynamic_pressure_pa: f64,
    /// Static pressure, Pa.
    pub static_pressure_pa: f64,
    /// Total temperature, K.
    pub total_temperature_k: f64,
    /// The side branch, if any.
    pub branch: Option<SideBranch>,
}

impl Conduit {
    /// A straight level conduit along the scene's +x.
    pub fn straight(radius_m: f64, dynamic_pressure_pa: f64) -> Self {
        Self {
            wiggle_amplitude_m: 0.0,
            wiggle_period_m: 1.0,
            climb: 0.0,
            radius_start_m: radius_m,
            radius_end_m: radius_m,
            narrowing_length_m: 1.0,
            dynamic_pressure_pa,
            static_pressure_pa: 101_325.0,
            total_temperature_k: 293.15,
            branch: None,
        }
    }

    /// The step-cost conduit: a 40 m wiggle of 2 m amplitude (smallest
    /// bend radius about 20 m), a 2 % climb, narrowing from 0.12 m to
    /// 0.085 m radius over 150 m, a side branch at x = 40 m.
    pub fn winding() -> Self {
        Self {
            wiggle_amplitude_m: 2.0,
            wiggle_period_m: 40.0,
            climb: 0.02,
            radius_start_m: 0.12,
            radius_end_m: 0.085,
            narrowing_length_m: 150.0,
            dynamic_pressure_pa: 40.0,
            static_pressure_pa: 101_325.0,
            total_temperature_k: 293.15,
            branch: Some(SideBranch {
                at_x_m: 40.0,
                angle_from_axis_rad: deg(50.0),
                side_rad: deg(-20.0),
                radius_m: 0.06,
                length_m: 3.0,
                flow_share: 0.3,
            }),
        }
    }

    fn k(&self) -> f64 {
        2.0 * core::f64::consts::PI / self.wiggle_period_m
    }

    /// Axis point at `x`, scene frame.
    pub fn axis(&self, x: f64) -> [f64; 3] {
        [
            x,
            self.wiggle_amplitude_m * libm::sin(self.k() * x),
            self.climb * x,
        ]
    }

    fn d_axis(&self, x: f64) -> [f64; 3] {
        let k = self.k();
        [
            1.0,
            self.wiggle_amplitude_m * k * libm::cos(k * x),
            self.climb,
        ]
    }

    fn dd_axis(&self, x: f64) -> [f64; 3] {
        let k = self.k();
        [
            0.0,
            -self.wiggle_amplitude_m * k * k * libm::sin(k * x),
            0.0,
        ]
    }

    /// Unit tangent (upstream, +x-ward) at `x`.
    pub fn tangent(&self, x: f64) -> [f64; 3] {
        unit(self.d_axis(x)).unwrap_or([1.0, 0.0, 0.0])
    }

    /// Section basis at `x`: tangent, "left" (`z x t`), "up" (`t x left`).
    pub fn basis(&self, x: f64) -> ([f64; 3], [f64; 3], [f64; 3]) {
        let t = self.tangent(x);
        let l = unit([-t[1], t[0], 0.0]).unwrap_or([0.0, 1.0, 0.0]);
        let u = cross(t, l);
        (t, l, u)
    }

    /// Unit radial direction at `x`, plane angle `phi` from left toward up.
    pub fn radial(&self, x: f64, phi_rad: f64) -> [f64; 3] {
        let (_, l, u) = self.basis(x);
        add(scale(l, libm::cos(phi_rad)), scale(u, libm::sin(phi_rad)))
    }

    /// Radius at `x`, m.
    pub fn radius_m(&self, x: f64) -> f64 {
        let f = (x / self.narrowing_length_m).clamp(0.0, 1.0);
        self.radius_start_m + (self.radius_end_m - self.radius_start_m) * f
    }

    /// The axis parameter nearest to `p`, by Newton from `x0`.
    pub fn nearest_x(&self, p: [f64; 3], x0: f64) -> f64 {
        let mut x = x0;
        for _ in 0..6 {
            let r = sub(self.axis(x), p);
            let d1 = self.d_axis(x);
            let f = dot(r, d1);
            let df = dot(d1, d1) + dot(r, self.dd_axis(x));
            if df.is_nan() || df <= 0.0 {
                break;
            }
            let step = f / df;
            x -= step;
            if libm::fabs(step) < 1e-13 {
                break;
            }
        }
        x
    }

    /// True when `p` lies in the side branch's lumen (no trunk wall there).
    pub fn in_branch(&self, p: [f64; 3]) -> bool {
        let Some(b) = self.branch else {
            return false;
        };
        let o = self.axis(b.at_x_m);
        let dir = self.branch_direction(&b);
        let rel = sub(p, o);
        let tau = dot(rel, dir);
        tau > 0.0 && tau < b.length_m && dot(rel, rel) - tau * tau < b.radius_m * b.radius_m
    }

    fn branch_direction(&self, b: &SideBranch) -> [f64; 3] {
        let t = self.tangent(b.at_x_m);
        let s = self.radial(b.at_x_m, b.side_rad);
        add(
            scale(t, libm::cos(b.angle_from_axis_rad)),
            scale(s, libm::sin(b.angle_from_axis_rad)),
        )
    }

    /// Flow at axis parameter `x`: unit velocity (scene frame) and dynamic
    /// pressure, Pa.
    pub fn flow_at(&self, x: f64) -> ([f64; 3], f64) {
        let r0 = self.radius_start_m;
        let r = self.radius_m(x);
        let area_ratio = (r0 * r0) / (r * r);
        let mut q = self.dynamic_pressure_pa * area_ratio * area_ratio;
        let mut v = scale(self.tangent(x), -1.0);
        if let Some(b) = self.branch {
            // Upstream of the junction the trunk carries 1 - share of the
            // mass flow; blended over one branch radius either side.
            let f = ((x - b.at_x_m + b.radius_m) / (2.0 * b.radius_m)).clamp(0.0, 1.0);
            let keep = 1.0 - b.flow_share * f;
            q *= keep * keep;
            // Gas leaving the branch pushes the trunk flow away from the
            // mouth.
            let z = (x - b.at_x_m) / (2.0 * b.radius_m);
            let tilt = b.flow_share * libm::exp(-z * z);
            let away = scale(self.radial(b.at_x_m, b.side_rad), -tilt);
            v = unit(add(v, away)).unwrap_or(v);
        }
        (v, q)
    }
}

/// How the robot moves and touches.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Gait {
    /// Head speed along the scene x, m/s.
    pub speed_m_per_s: f64,
    /// Head x at time 0, m.
    pub start_x_m: f64,
    /// Belly pads pressed into the wall (else the body rides on the axis).
    pub pressed: bool,
    /// Pad compression when pressed, m.
    pub squeeze_m: f64,
    /// Rocking centre: plane angle of the pressed line, rad (-pi/2: floor).
    pub rock_centre_rad: f64,
    /// Rocking amplitude, rad.
    pub rock_amplitude_rad: f64,
    /// Rocking period, s (> 0).
    pub rock_period_s: f64,
    /// The head lifts off the wall to the axis every this many seconds
    /// (0: never).
    pub head_lift_every_s: f64,
    /// For this long, s.
    pub head_lift_for_s: f64,
    /// Extra yaw of the head about its own z axis, rad (misalignment).
    pub head_yaw_rad: f64,
}

impl Gait {
    /// Pressed on the floor, rocking +-60 deg with a 0.8 s period, 0.1 m/s,
    /// the head lifting for 0.3 s every 1.5 s.
    pub const ROCKING: Self = Self {
        speed_m_per_s: 0.1,
        start_x_m: 0.0,
        pressed: true,
        squeeze_m: 0.001,
        rock_centre_rad: -core::f64::consts::FRAC_PI_2,
        rock_amplitude_rad: core::f64::consts::FRAC_PI_3,
        rock_period_s: 0.8,
        head_lift_every_s: 1.5,
        head_lift_for_s: 0.3,
        head_yaw_rad: 0.0,
    };

    /// On the axis, touching nothing, no rocking.
    pub const CENTRED: Self = Self {
        speed_m_per_s: 0.1,
        start_x_m: 0.0,
        pressed: false,
        squeeze_m: 0.0,
        rock_centre_rad: -core::f64::consts::FRAC_PI_2,
        rock_amplitude_rad: 0.0,
        rock_period_s: 1.0,
        head_lift_every_s: 0.0,
        head_lift_for_s: 0.0,
        head_yaw_rad: 0.0,
    };
}

/// What the scene knew when it made the last frame.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct FrameTruth {
    /// Frame time, s.
    pub time_s: f64,
    /// Axis parameter nearest the head, m.
    pub head_x_m: f64,
    /// Conduit radius there, m.
    pub radius_m: f64,
    /// Upstream unit vector at the head (minus the gas velocity), map frame.
    pub upstream_map: [f64; 3],
    /// Head position, map frame, m.
    pub head_position_map_m: [f64; 3],
    /// Conduit axis point nearest the head, map frame, m.
    pub axis_point_map_m: [f64; 3],
    /// Conduit axis direction (upstream) at the head, map frame.
    pub axis_map: [f64; 3],
    /// Dynamic pressure at the head, Pa.
    pub dynamic_pressure_pa: f64,
    /// Pads touching wall.
    pub touching: usize,
    /// Contacts reported.
    pub reported: usize,
    /// Pressed pads that felt nothing although no hole was under them.
    pub pressed_lifted_off: usize,
    /// Pressed pads over the branch hole.
    pub over_hole: usize,
    /// Contacts the frame had no slot for.
    pub dropped: usize,
    /// Deepest pad penetration, m.
    pub max_depth_m: f64,
    /// Head lift, 0 (on the wall) ..= 1 (on the axis).
    pub head_lift: f64,
}

/// A running scene: call [`FrameScene::next_frame`] once per step.
#[derive(Debug, Clone)]
pub struct FrameScene {
    /// The conduit.
    pub conduit: Conduit,
    /// The robot.
    pub robot: Robot,
    /// The gait.
    pub gait: Gait,
    /// Scene frame to map frame.
    pub placement: Rigid,
    /// Frame period, s.
    pub dt_s: f64,
    /// Port noise, 1 sigma, Pa.
    pub probe_sigma_pa: f64,
    /// Pad force per metre of compression, N/m.
    pub pad_stiffness_n_per_m: f64,
    layout: ProbeLayout<PORTS>,
    model: ProbeModel<PORTS>,
    rng: ChaCha8Rng,
    step: u64,
    truth: FrameTruth,
}

fn cross(a: [f64; 3], b: [f64; 3]) -> [f64; 3] {
    [
        a[1] * b[2] - a[2] * b[1],
        a[2] * b[0] - a[0] * b[2],
        a[0] * b[1] - a[1] * b[0],
    ]
}

fn conj(q: [f64; 4]) -> [f64; 4] {
    [q[0], -q[1], -q[2], -q[3]]
}

fn q_axis(axis: usize, angle_rad: f64) -> [f64; 4] {
    let (s, c) = (libm::sin(0.5 * angle_rad), libm::cos(0.5 * angle_rad));
    let mut q = [c, 0.0, 0.0, 0.0];
    if let Some(v) = q.get_mut(axis + 1) {
        *v = s;
    }
    q
}

/// Unit quaternion of the rotation whose columns are `x`, `y`, `z`.
fn quat_from_axes(x: [f64; 3], y: [f64; 3], z: [f64; 3]) -> [f64; 4] {
    let (m00, m01, m02) = (x[0], y[0], z[0]);
    let (m10, m11, m12) = (x[1], y[1], z[1]);
    let (m20, m21, m22) = (x[2], y[2], z[2]);
    let tr = m00 + m11 + m22;
    let q = if tr > 0.0 {
        let s = 2.0 * libm::sqrt(tr + 1.0);
        [0.25 * s, (m21 - m12) / s, (m02 - m20) / s, (m10 - m01) / s]
    } else if m00 > m11 && m00 > m22 {
        let s = 2.0 * libm::sqrt(1.0 + m00 - m11 - m22);
        [(m21 - m12) / s, 0.25 * s, (m01 + m10) / s, (m02 + m20) / s]
    } else if m11 > m22 {
        let s = 2.0 * libm::sqrt(1.0 + m11 - m00 - m22);
        [(m02 - m20) / s, (m01 + m10) / s, 0.25 * s, (m12 + m21) / s]
    } else {
        let s = 2.0 * libm::sqrt(1.0 + m22 - m00 - m11);
        [(m10 - m01) / s, (m02 + m20) / s, (m12 + m21) / s, 0.25 * s]
    };
    let n = libm::sqrt(q.iter().map(|v| v * v).sum::<f64>());
    let q = [q[0] / n, q[1] / n, q[2] / n, q[3] / n];
    if q[0] < 0.0 {
        [-q[0], -q[1], -q[2], -q[3]]
    } else {
        q
    }
}

fn qnormalize(q: [f64; 4]) -> [f64; 4] {
    let n = libm::sqrt(q.iter().map(|v| v * v).sum::<f64>());
    [q[0] / n, q[1] / n, q[2] / n, q[3] / n]
}

impl FrameScene {
    /// A scene. The probe's ports have `probe_sigma_pa` of noise (also the
    /// sigma the layout declares to the solver).
    pub fn new(
        conduit: Conduit,
        robot: Robot,
        gait: Gait,
        placement: Rigid,
        probe_sigma_pa: f64,
        seed: u64,
    ) -> Self {
        let layout = ProbeLayout::seven_port(deg(40.0), probe_sigma_pa).expect("7-port layout");
        let model = ProbeModel::new(layout, IdealGas::DRY_AIR, WakeTreatment::Attached)
            .expect("probe model");
        Self {
            conduit,
            robot,
            gait,
            placement,
            dt_s: 0.01,
            probe_sigma_pa,
            pad_stiffness_n_per_m: 2000.0,
            layout,
            model,
            rng: ChaCha8Rng::seed_from_u64(seed),
            step: 0,
            truth: FrameTruth::default(),
        }
    }

    /// The step-cost scene: [`Conduit::winding`], [`Gait::ROCKING`], placed
    /// with a turn and an offset in the map, 0.5 Pa port noise.
    pub fn winding(seed: u64) -> Self {
        Self::new(
            Conduit::winding(),
            Robot::DEMO,
            Gait::ROCKING,
            Rigid::new([0.1, -0.2, 1.0], 0.6, [25.0, -4.0, 1.5]),
            0.5,
            seed,
        )
    }

    /// The probe layout (for the navigator's configuration).
    pub fn probe_layout(&self) -> ProbeLayout<PORTS> {
        self.layout
    }

    /// A navigator configuration for this robot and probe, defaults
    /// otherwise.
    pub fn onboard_config<const M: usize, const S: usize>(&self) -> OnboardConfig<PORTS, M, S> {
        OnboardConfig::new(
            self.robot.body_config::<M, S>(),
            self.layout,
            IdealGas::DRY_AIR,
        )
    }

    /// Truth behind the last frame.
    pub fn truth(&self) -> &FrameTruth {
        &self.truth
    }

    /// Frames made so far.
    pub fn steps(&self) -> u64 {
        self.step
    }

    fn normal(&mut self) -> f64 {
        let u1 = ((self.rng.next_u64() >> 11) as f64 + 1.0) / 9_007_199_254_740_993.0;
        let u2 = (self.rng.next_u64() >> 11) as f64 / 9_007_199_254_740_992.0;
        libm::sqrt(-2.0 * libm::log(u1)) * libm::cos(2.0 * core::f64::consts::PI * u2)
    }

    fn head_lift(&self, t: f64) -> f64 {
        let g = &self.gait;
        if !(g.head_lift_every_s > 0.0 && g.head_lift_for_s > 0.0) {
            return 0.0;
        }
        let tau = t - g.head_lift_every_s * libm::floor(t / g.head_lift_every_s);
        // The first lift comes one period in, after the start.
        if t < g.head_lift_every_s || tau >= g.head_lift_for_s {
            return 0.0;
        }
        let s = libm::sin(core::f64::consts::PI * tau / g.head_lift_for_s);
        s * s
    }

    /// Pressed line at axis parameter `x` for a head at `x_head`.
    fn line(&self, x: f64, x_head: f64, phi: f64, lift: f64) -> [f64; 3] {
        let a = self.conduit.axis(x);
        if !self.gait.pressed {
            return a;
        }
        let r = self.robot.module_radius_m;
        let d = self.conduit.radius_m(x) - r + self.gait.squeeze_m;
        // The lift fades out within the head module's chord (its far end,
        // even tilted, lies more than 0.8 L behind the head).
        let behind = (x_head - x) / (0.8 * self.robot.module_length_m);
        let d = d * (1.0 - lift * (1.0 - behind).clamp(0.0, 1.0));
        add(a, scale(self.conduit.radial(x, phi), d))
    }

    /// The axis parameter `x < x_guess + L` whose pressed-line point is one
    /// module length from `from` (secant iteration, capped).
    fn chord_end(&self, from: [f64; 3], x_guess: f64, x_head: f64, phi: f64, lift: f64) -> f64 {
        let len = self.robot.module_length_m;
        let g = |x: f64| norm(sub(self.line(x, x_head, phi, lift), from)) - len;
        let (mut x0, mut x1) = (x_guess, x_guess - 0.01);
        let (mut g0, mut g1) = (g(x0), g(x1));
        for _ in 0..12 {
            if libm::fabs(g1) < 1e-13 || g1 == g0 {
                break;
            }
            let x2 = x1 - g1 * (x1 - x0) / (g1 - g0);
            x0 = x1;
            g0 = g1;
            x1 = x2;
            g1 = g(x1);
        }
        x1
    }

    /// The next frame (time advances by `dt_s`). `J >= 7`, `C >= 32`
    /// recommended; contacts beyond `C` are dropped (counted in the truth).
    pub fn next_frame<const J: usize, const C: usize>(&mut self) -> SensorFrame<PORTS, J, C> {
        let t = f64::from(u32::try_from(self.step).unwrap_or(u32::MAX)) * self.dt_s;
        self.step += 1;
        let g = self.gait;
        let len = self.robot.module_length_m;
        let r = self.robot.module_radius_m;
        let x_head = g.start_x_m + g.speed_m_per_s * t;
        let phi = g.rock_centre_rad
            + g.rock_amplitude_rad * libm::sin(2.0 * core::f64::consts::PI * t / g.rock_period_s);
        let lift = if g.pressed { self.head_lift(t) } else { 0.0 };

        // The chain, scene frame: origins and rotations.
        let mut origin = [[0.0f64; 3]; MODULES];
        let mut rot = [[1.0f64, 0.0, 0.0, 0.0]; MODULES];
        let mut joints = [JointAngles::default(); J];
        let o0 = self.line(x_head, x_head, phi, lift);
        let mut x_next = self.chord_end(o0, x_head - len, x_head, phi, lift);
        let fwd = unit(sub(o0, self.line(x_next, x_head, phi, lift))).unwrap_or([1.0, 0.0, 0.0]);
        let belly = unit(reject(self.conduit.radial(x_head, phi), fwd)).unwrap_or([0.0, 0.0, -1.0]);
        let z0 = scale(belly, -1.0);
        let y0 = cross(z0, fwd);
        let mut q = quat_from_axes(fwd, y0, z0);
        if g.head_yaw_rad != 0.0 {
            q = qnormalize(qmul(q, q_axis(2, g.head_yaw_rad)));
        }
        origin[0] = o0;
        rot[0] = q;
        for k in 0..MODULES - 1 {
            let next_origin = sub(origin[k], scale(rotate(rot[k], [1.0, 0.0, 0.0]), len));
            x_next = self.chord_end(next_origin, x_next - len, x_head, phi, lift);
            let dir = unit(sub(next_origin, self.line(x_next, x_head, phi, lift)))
                .unwrap_or([1.0, 0.0, 0.0]);
            let w = rotate(conj(rot[k]), dir);
            let yaw = libm::atan2(w[1], w[0]);
            let pitch = -libm::asin(w[2].clamp(-1.0, 1.0));
            if let Some(j) = joints.get_mut(k) {
                *j = JointAngles {
                    pitch_rad: pitch,
                    yaw_rad: yaw,
                };
            }
            origin[k + 1] = next_origin;
            rot[k + 1] = qnormalize(qmul(qmul(rot[k], q_axis(2, yaw)), q_axis(1, pitch)));
        }

        // Contacts.
        let mut frame: SensorFrame<PORTS, J, C> = SensorFrame::empty(t);
        // The scene's skin works: it reports every frame, touching or not.
        frame.contacts_reported = true;
        let mut truth = FrameTruth {
            time_s: t,
            head_lift: lift,
            ..FrameTruth::default()
        };
        for (k, (o, q)) in origin.iter().zip(rot.iter()).enumerate() {
            let kf = f64::from(u32::try_from(k).unwrap_or(0));
            for j in 0..PADS_PER_MODULE {
                let psi = Robot::pad_angle_rad(j);
                let skin = [
                    -self.robot.pad_axial_m,
                    r * libm::cos(psi),
                    r * libm::sin(psi),
                ];
                let p = add(*o, rotate(*q, skin));
                let xp = self.conduit.nearest_x(p, x_head - (kf + 0.5) * len);
                let depth = norm(sub(p, self.conduit.axis(xp))) - self.conduit.radius_m(xp);
                let hole = self.conduit.in_branch(p);
                let touching = depth > 0.0 && !hole;
                let sensor = u16::try_from(j).unwrap_or(0);
                let pressed = g.pressed && sensor == BELLY_PAD && (k > 0 || lift <= 0.0);
                if touching {
                    truth.touching += 1;
                    truth.max_depth_m = truth.max_depth_m.max(depth);
                } else if pressed {
                    if hole {
                        truth.over_hole += 1;
                    } else {
                        truth.pressed_lifted_off += 1;
                    }
                }
                if touching || pressed {
                    let c = Contact {
                        module: u16::try_from(k).unwrap_or(0),
                        sensor,
                        force_n: if touching {
                            self.pad_stiffness_n_per_m * depth
                        } else {
                            0.0
                        },
                        normal_module: None,
                    };
                    if frame.push_contact(c) {
                        truth.reported += 1;
                    } else {
                        truth.dropped += 1;
                    }
                }
            }
        }

        // Flow at the probe.
        let xh = self.conduit.nearest_x(o0, x_head);
        let (v, q_pa) = self.conduit.flow_at(xh);
        let v_probe = unit(rotate(conj(rot[0]), v)).unwrap_or([-1.0, 0.0, 0.0]);
        let ps = self.conduit.static_pressure_pa;
        let pressures = FlowCondition::from_dynamic_pressure(&IdealGas::DRY_AIR, v_probe, ps, q_pa)
            .and_then(|f| self.model.port_pressures(Regime::Incompressible, &f));
        if let Ok(mut p) = pressures {
            for x in p.iter_mut() {
                *x += self.probe_sigma_pa * self.normal();
            }
            frame.port_pressures_pa = Some(p);
        }
        frame.total_temperature_k = Some(self.conduit.total_temperature_k);
        frame.pose = Some(HeadPose {
            position_m: self.placement.point(o0),
            orientation_wxyz: qnormalize(qmul(self.placement.q, rot[0])),
            position_sigma_m: 0.002,
            attitude_sigma_rad: 0.002,
        });
        frame.joints = Some(joints);

        truth.head_x_m = xh;
        truth.radius_m = self.conduit.radius_m(xh);
        truth.upstream_map = self.placement.vec(scale(v, -1.0));
        truth.head_position_map_m = self.placement.point(o0);
        truth.axis_point_map_m = self.placement.point(self.conduit.axis(xh));
        truth.axis_map = self.placement.vec(self.conduit.tangent(xh));
        truth.dynamic_pressure_pa = q_pa;
        self.truth = truth;
        frame
    }
}

/// Angle between two vectors, rad.
pub fn angle_between(a: [f64; 3], b: [f64; 3]) -> f64 {
    let c = dot(a, b) / (norm(a) * norm(b));
    libm::acos(c.clamp(-1.0, 1.0))
}
