//! Shared workloads for the cross-crate tests.
//!
//! [`core_workload_digest`] runs a fixed, deterministic computation through
//! `nav-core` and returns its FNV-1a digest. The determinism test runs it in
//! this process and, through the `determinism-witness` binary, in a separate
//! one, and compares both with the constants committed in
//! `tests/determinism.rs`. Every new core entry point should be fed here.

pub mod frame_scene;
pub mod nav_scene;

use nav_core::body::{Body, BodyConfig, ModuleSpec, SensorSpec};
use nav_core::digest::Fnv64;
use nav_core::frame::{Contact, HeadPose, JointAngles, SensorFrame};
use nav_core::gas::IdealGas;
use nav_core::tactile::ellipse::{direct_ellipse, geometric_ellipse};
use nav_core::tactile::fit::{
    AlgebraicMethod, LmSettings, algebraic_circle, algebraic_circle_general, geometric_circle,
};
use nav_core::tactile::{
    OpeningReport, OpeningSettings, SectionSettings, SectionShape, TactileConfig, TactileMap,
    ThroatSettings, fit_plane_section,
};

/// Transcendental functions straight from `libm`, over a fixed grid that
/// includes awkward arguments (large, tiny, near multiples of pi).
pub fn libm_digest() -> u64 {
    let mut d = Fnv64::new();
    for i in 0..2000u32 {
        let x = f64::from(i) * 0.0137 - 7.3;
        d.f64(libm::sin(x * 113.0));
        d.f64(libm::cos(x * 1e3));
        d.f64(libm::tan(x));
        d.f64(libm::exp(x));
        d.f64(libm::log(libm::fabs(x) + 1e-300));
        d.f64(libm::pow(libm::fabs(x), 1.0 / 3.5));
        d.f64(libm::atan2(x, 1.0 - x));
        d.f64(libm::asin(libm::sin(x)));
        d.f64(libm::sqrt(libm::fabs(x)));
        d.f64(libm::cbrt(x));
        d.f64(libm::hypot(x, 0.3));
    }
    d.finish()
}

/// A closed-loop navigator run over an invented fork (the strongest wide
/// branch is a dead end, the strongest overall is too narrow): follow,
/// sampling, choice, entry, back-out, resumption. Every command is fed to
/// `d`. No heap allocation (the navigator lives on the stack).
pub fn navigator_workload(d: &mut Fnv64) {
    use nav_core::navigator::{NavConfig, StandardNavigator};
    use nav_scene::{ForkBranch, Rigid, Sim, fork_scene_len};
    let branches = [
        ForkBranch {
            yaw_rad: 0.6,
            width_m: 0.5,
            dynamic_pressure_pa: 20.0,
            dead_end: false,
        },
        ForkBranch {
            yaw_rad: -0.6,
            width_m: 0.5,
            dynamic_pressure_pa: 50.0,
            dead_end: true,
        },
        ForkBranch {
            yaw_rad: 0.0,
            width_m: 0.2,
            dynamic_pressure_pa: 500.0,
            dead_end: false,
        },
    ];
    let scene = fork_scene_len(0.3, 40.0, &branches, 1.5);
    let rigid = Rigid::new([0.3, -0.2, 1.0], 0.7, [12.0, -3.0, 1.5]);
    let mut sim = Sim::new(scene, [-1.5, 0.02, 0.0], rigid, 2024, true);
    let Ok(cfg) = NavConfig::for_robot(0.1).validate() else {
        d.u64(u64::MAX);
        return;
    };
    let Ok(mut nav) = StandardNavigator::new(cfg) else {
        d.u64(u64::MAX);
        return;
    };
    for _ in 0..8000 {
        let o = sim.observe();
        let c = nav.step(&o);
        c.digest_into(d);
        sim.apply(&c);
        if sim.reached {
            break;
        }
    }
    d.u64(u64::from(sim.reached));
}

/// The core's own numerics: gas relations and their root-finding inverses,
/// then a navigator run ([`navigator_workload`]), the tactile, probe and
/// frame-level workloads.
pub fn core_workload_digest() -> u64 {
    let mut d = Fnv64::new();
    let gases = [
        IdealGas::DRY_AIR,
        IdealGas::WATER_VAPOUR,
        IdealGas::new(1.33, 461.5).unwrap_or(IdealGas::DRY_AIR),
    ];
    for g in gases {
        for i in 1..400u32 {
            let m = f64::from(i) * 0.0125;
            let mut put = |r: Result<f64, nav_core::gas::GasError>| match r {
                Ok(v) => d.f64(v),
                Err(_) => d.u64(u64::MAX),
            };
            put(g.p0_over_p(m));
            put(g.rho0_over_rho(m));
            put(g.area_ratio(m));
            put(g.rayleigh_pitot_p02_over_p1(m));
            put(g.normal_shock_p02_over_p01(m));
            if let Ok(a) = g.area_ratio(m) {
                put(g.mach_from_area_ratio_subsonic(a));
                put(g.mach_from_area_ratio_supersonic(a));
            }
            if let Ok(p) = g.p0_over_p(m) {
                put(g.mach_from_pitot_over_static(p));
            }
        }
    }
    navigator_workload(&mut d);
    tactile_workload(&mut d);
    probe_workload(&mut d);
    frame_workload(&mut d);
    flow_window_workload(&mut d);
    d.finish()
}

/// The windowed flow estimate (`nav_core::flow_window`) on weak air: a
/// 0.3 m/s flow read by a 7-port head with a fixed pseudo-noise pattern
/// (offsets from `libm::sin`, 0.03 Pa), the head dwelling, then crawling
/// and yawing, then a turn past the discount angle and a change of flow.
/// Every estimate's numbers are fed to `d`.
pub fn flow_window_workload(d: &mut Fnv64) {
    use nav_core::flow_window::{FlowWindow, FlowWindowConfig, WindowStatus};
    use nav_core::frame::HeadPose;
    use nav_core::probe::{ProbeLayout, deg};
    let (Ok(layout), Ok(mut win)) = (
        ProbeLayout::seven_port(deg(40.0), 0.03),
        FlowWindow::<7>::new(FlowWindowConfig::default()),
    ) else {
        d.u64(u64::MAX);
        return;
    };
    let rho = 1.2;
    let mut x = 0.0;
    for i in 0..900u32 {
        let k = f64::from(i);
        let t = 0.01 * k;
        let (w, v, yaw) = match i {
            0..300 => ([-0.3, 0.05, 0.0], 0.0, 0.0),
            300..600 => ([-0.3, 0.05, 0.0], 0.1, 0.2 * libm::sin(0.5 * t)),
            600..750 => ([-0.3, 0.05, 0.0], 0.1, 0.8),
            _ => ([0.1, -0.3, 0.02], 0.05, 0.8),
        };
        x += v * 0.01;
        let fwd = [libm::cos(yaw), libm::sin(yaw), 0.0];
        let pose = HeadPose {
            position_m: [x * fwd[0], x * fwd[1], 0.0],
            orientation_wxyz: [libm::cos(0.5 * yaw), 0.0, 0.0, libm::sin(0.5 * yaw)],
            position_sigma_m: 0.0,
            attitude_sigma_rad: 0.0,
        };
        let rel = [w[0] - v * fwd[0], w[1] - v * fwd[1], w[2]];
        let speed2 = rel[0] * rel[0] + rel[1] * rel[1] + rel[2] * rel[2];
        let speed = libm::sqrt(speed2);
        let mut p = [101_325.0; 7];
        for (j, (o, n)) in p.iter_mut().zip(layout.normals()).enumerate() {
            let nm = [
                libm::cos(yaw) * n.x - libm::sin(yaw) * n.y,
                libm::sin(yaw) * n.x + libm::cos(yaw) * n.y,
                n.z,
            ];
            let c = if speed > 0.0 {
                -(nm[0] * rel[0] + nm[1] * rel[1] + nm[2] * rel[2]) / speed
            } else {
                0.0
            };
            let noise = 0.03 * libm::sin(1.7 * k + 2.3 * f64::from(j as u32) + 0.01 * k * k);
            *o += 0.5 * rho * speed2 * (1.0 - 2.25 * (1.0 - c * c)) + noise;
        }
        match win.add(t, &p, &layout, &pose, rho, 0) {
            Ok(e) => {
                d.u64(match e.status {
                    WindowStatus::Empty => 0,
                    WindowStatus::Integrating => 1,
                    WindowStatus::Resolved => 2,
                    WindowStatus::NoUsableFlow => 3,
                    WindowStatus::DwellExpired => 4,
                });
                d.f64s(&e.velocity_dir_map.unwrap_or([9.0; 3]));
                d.f64(e.dir_sigma_rad());
                d.f64(e.dynamic_pressure_pa);
                d.f64(e.dynamic_pressure_sigma_pa);
                d.f64(e.flow_chi_square);
                d.f64(e.sense_log_ratio);
                d.u64(u64::from(e.discounts));
            }
            Err(_) => d.u64(u64::MAX - 2),
        }
    }
    d.f64s(&win.head_velocity_m_per_s());
}

/// The frame-level navigator (`nav_core::onboard::FrameNavigator`) on an
/// invented sensor-frame sequence ([`frame_scene`]): a short, slightly
/// winding, narrowing conduit with a side branch near the start, the
/// robot pressed onto the wall and rocking, with a NaN port, a contact on
/// a missing module and a second of probe silence along the way. Every
/// command, the stage counters and each fitted section radius are fed to
/// `d`. No heap allocation (the navigator lives on the stack).
pub fn frame_workload(d: &mut Fnv64) {
    use frame_scene::{Conduit, FrameScene, Gait, Robot, SideBranch};
    use nav_core::onboard::StandardFrameNavigator;
    let conduit = Conduit {
        wiggle_amplitude_m: 0.05,
        wiggle_period_m: 2.0,
        climb: 0.01,
        radius_start_m: 0.1,
        radius_end_m: 0.09,
        narrowing_length_m: 1.0,
        branch: Some(SideBranch {
            at_x_m: 0.45,
            angle_from_axis_rad: 0.9,
            side_rad: -0.4,
            radius_m: 0.05,
            length_m: 1.0,
            flow_share: 0.3,
        }),
        ..Conduit::straight(0.1, 40.0)
    };
    let placement = nav_scene::Rigid::new([-0.2, 0.4, 1.0], 1.3, [-7.0, 2.0, 0.5]);
    let mut scene = FrameScene::new(conduit, Robot::DEMO, Gait::ROCKING, placement, 0.5, 77);
    let Ok(mut nav) = StandardFrameNavigator::new(scene.onboard_config::<8, 48>()) else {
        d.u64(u64::MAX);
        return;
    };
    let mut fits = 0;
    for k in 0..600u32 {
        let mut f: SensorFrame<7, 7, 48> = scene.next_frame();
        if k == 200
            && let Some(p) = f.port_pressures_pa.as_mut()
        {
            p[2] = f64::NAN;
        }
        if k == 250 {
            let _ = f.push_contact(Contact {
                module: 8,
                sensor: 0,
                force_n: 1.0,
                normal_module: None,
            });
        }
        if (400..500).contains(&k) {
            f.port_pressures_pa = None;
        }
        let c = nav.step(&f);
        c.digest_into(d);
        let ctr = nav.counters();
        if ctr.section_fits > fits {
            fits = ctr.section_fits;
            match nav.last_section().map(|s| s.plane.shape) {
                Some(SectionShape::Circle(circle)) => d.f64(circle.radius_m),
                Some(SectionShape::LowerBoundOnly { min_radius_m, .. }) => d.f64(-min_radius_m),
                _ => d.u64(7),
            }
        }
    }
    let ctr = nav.counters();
    d.u64(ctr.steps);
    d.u64(ctr.probe_errors);
    d.u64(ctr.tactile_errors);
    d.u64(ctr.section_fits);
}

/// Body kinematics, contact ingestion, circle and ellipse fits, sections,
/// throat and openings on a fixed synthetic traverse (our own scenario: a
/// 4-module body snaking through a slowly narrowing, slightly elliptic
/// pipe). No allocation: everything lives on the stack.
pub fn tactile_workload(d: &mut Fnv64) {
    // Plane fits on fixed arcs with a deterministic wobble.
    let mut pts = [[0.0f64; 2]; 24];
    for (k, span) in [0.8f64, 2.0, 3.5, 6.2].iter().enumerate() {
        let kf = f64::from(u32::try_from(k).unwrap_or(0));
        for (i, p) in pts.iter_mut().enumerate() {
            let t = span * f64::from(u32::try_from(i).unwrap_or(0)) / 23.0 + 0.3 * kf;
            let wobble = 0.002 * libm::sin(7.3 * t + kf);
            *p = [
                0.1 + (0.45 + wobble) * libm::cos(t),
                -0.2 + (0.4 + wobble) * libm::sin(t),
            ];
        }
        for m in [
            AlgebraicMethod::Kasa,
            AlgebraicMethod::Pratt,
            AlgebraicMethod::Hyper,
        ] {
            for r in [algebraic_circle(&pts, m), algebraic_circle_general(&pts, m)] {
                match r {
                    Ok(a) => d.f64s(&[a.circle.centre[0], a.circle.centre[1], a.circle.radius_m]),
                    Err(_) => d.u64(u64::MAX),
                }
            }
        }
        if let Ok(h) = algebraic_circle(&pts, AlgebraicMethod::Hyper)
            && let Ok(g) = geometric_circle(&pts, &h.circle, &LmSettings::default())
        {
            d.f64s(&[g.circle.radius_m, g.rms_residual_m, g.covariance.m33]);
        }
        if let Ok(e) = direct_ellipse(&pts) {
            d.f64s(&[e.semi_major_m, e.semi_minor_m, e.major_axis_angle_rad]);
            if let Ok(g) = geometric_ellipse(&pts, &e, &LmSettings::default()) {
                d.f64s(&[
                    g.ellipse.semi_major_m,
                    g.ellipse.semi_minor_m,
                    g.rms_residual_m,
                ]);
            }
        }
        let s = fit_plane_section(&pts, &Default::default());
        d.f64(s.coverage_rad);
        match s.shape {
            SectionShape::Circle(c) => d.f64(c.radius_m),
            SectionShape::LowerBoundOnly { min_radius_m, .. } => d.f64(min_radius_m),
            SectionShape::Unknown { .. } => d.u64(1),
        }
    }

    // The traverse.
    let mut cfg = BodyConfig::<4, 32>::uniform(
        4,
        ModuleSpec {
            length_m: 0.2,
            radius_m: 0.05,
        },
    );
    for m in 0..4u16 {
        for j in 0..8u16 {
            cfg.push_sensor(SensorSpec {
                module: m,
                axial_m: 0.1,
                angle_rad: f64::from(j) * core::f64::consts::FRAC_PI_4,
                cap_polar_rad: None,
            });
        }
    }
    cfg.joint_sigma_rad = 0.002;
    let Ok(body) = Body::new(cfg) else {
        d.u64(2);
        return;
    };
    let Ok(mut map) = TactileMap::<256>::new(TactileConfig::default()) else {
        d.u64(3);
        return;
    };
    for k in 0..120u32 {
        let kf = f64::from(k);
        let t = 0.05 * kf;
        let roll = 0.37 * kf;
        let pipe_r = 0.3 - 0.0004 * kf;
        let off = pipe_r - 0.05;
        // The body lies along +x, offset toward the wall at angle `roll`;
        // sensor 0 of each module (rolled to face the wall) touches.
        let mut f: SensorFrame<0, 3, 8> = SensorFrame::empty(t);
        f.pose = Some(HeadPose {
            position_m: [
                0.01 * kf + 0.1,
                off * libm::cos(roll),
                off * libm::sin(roll),
            ],
            orientation_wxyz: [libm::cos(0.5 * roll), libm::sin(0.5 * roll), 0.0, 0.0],
            position_sigma_m: 0.001,
            attitude_sigma_rad: 0.001,
        });
        f.joints = Some([JointAngles::default(); 3]);
        for m in 0..4u16 {
            f.push_contact(Contact {
                module: m,
                sensor: 0,
                force_n: 1.0 + 0.1 * f64::from(m),
                normal_module: None,
            });
            // A light reading on the opposite sensor: free space.
            f.push_contact(Contact {
                module: m,
                sensor: 4,
                force_n: 0.0,
                normal_module: None,
            });
        }
        match map.ingest(&f, &body) {
            Ok(r) => d.u64(u64::try_from(r.wall_points + 10 * r.free_probes).unwrap_or(0)),
            Err(_) => d.u64(4),
        }
    }
    let pose = HeadPose {
        position_m: [1.29, 0.0, 0.0],
        orientation_wxyz: [1.0, 0.0, 0.0, 0.0],
        position_sigma_m: 0.0,
        attitude_sigma_rad: 0.0,
    };
    let Ok(poses) = body.module_poses(&pose, &[JointAngles::default(); 3]) else {
        d.u64(5);
        return;
    };
    let set = SectionSettings::default();
    let Some(first) = body.station(&poses, 0.1) else {
        d.u64(6);
        return;
    };
    let mut list = [first; 4];
    for (i, slot) in list.iter_mut().enumerate() {
        let arc = 0.1 + 0.2 * f64::from(u32::try_from(i).unwrap_or(0));
        *slot = body.station(&poses, arc).unwrap_or(first);
    }
    for s in &list {
        let sec = map.section_at(s, &set);
        d.f64(sec.plane.coverage_rad);
        d.f64s(sec.axis_map.as_slice());
        if let SectionShape::Circle(c) = sec.plane.shape {
            d.f64s(&[c.centre_plane_m[0], c.centre_plane_m[1], c.radius_m]);
        }
        let o: OpeningReport<4> = map.openings(&sec, &set, &OpeningSettings::default());
        d.u64(u64::try_from(o.count).unwrap_or(0));
        for c in o.candidates() {
            d.f64s(&[c.angle_rad, c.clear_width_m]);
        }
    }
    let th = map.throat(&list, &set, &ThroatSettings::default());
    d.f64s(&[th.slope, th.min_clear_diameter_m.unwrap_or(-1.0)]);
}

/// Probe inversions: both presets, every regime, a leaking port, a
/// fixed pseudo-noise pattern (no RNG: offsets from `libm::sin`).
pub fn probe_workload(d: &mut Fnv64) {
    use nav_core::probe::{
        Direction, FaultReport, FlowCondition, ProbeLayout, ProbeSolver, Regime, SolverConfig, deg,
    };
    let gas = IdealGas::DRY_AIR;
    let (Ok(seven), Ok(five)) = (
        ProbeLayout::seven_port(deg(40.0), 5.0),
        ProbeLayout::five_port(deg(45.0), 5.0),
    ) else {
        d.u64(u64::MAX);
        return;
    };
    let (Ok(s7), Ok(s5)) = (
        ProbeSolver::new(seven, gas, SolverConfig::default()),
        ProbeSolver::new(five, gas, SolverConfig::default()),
    ) else {
        d.u64(u64::MAX);
        return;
    };
    let put = |d: &mut Fnv64, r: Result<nav_core::probe::FlowSolution, _>| match r {
        Ok(sol) => {
            if let Direction::Valid { velocity_unit, .. } = sol.direction {
                d.f64s(velocity_unit.as_slice());
            } else {
                d.u64(1);
            }
            d.f64(sol.static_pressure_pa);
            d.f64(sol.dynamic_pressure_pa);
            d.f64(sol.mach);
            d.f64(sol.sigma.angle_rad);
            d.f64(sol.chi_square);
            d.u64(u64::from(sol.convergence.iterations()));
            d.u64(match sol.fault {
                FaultReport::NotTestable => 10,
                FaultReport::Consistent { .. } => 11,
                FaultReport::Isolated { port, .. } => 100 + port as u64,
                FaultReport::DetectedNotIsolated { .. } => 12,
            });
            if let Some(v) = sol.speed_m_per_s {
                d.f64(v);
            }
        }
        Err(_) => d.u64(u64::MAX - 1),
    };
    for i in 0..24u32 {
        let k = f64::from(i);
        let theta = deg(2.5 * k);
        let phi = deg(37.0 * k);
        let v = [
            -libm::cos(theta),
            -libm::sin(theta) * libm::cos(phi),
            -libm::sin(theta) * libm::sin(phi),
        ];
        let (regime, mach, ps) = match i % 3 {
            0 => (Regime::Incompressible, 0.08, 101_325.0),
            1 => (Regime::CompressibleSubsonic, 0.45, 60_000.0),
            _ => (Regime::Supersonic, 1.9, 20_000.0),
        };
        let flow = FlowCondition {
            velocity_unit: v,
            static_pressure_pa: ps,
            mach,
        };
        if let Ok(mut p) = s7.model().port_pressures(regime, &flow) {
            for (j, x) in (0u32..).zip(p.iter_mut()) {
                *x += 5.0 * libm::sin(f64::from(7 * i + 3 * j) * 1.3);
            }
            if i % 4 == 1 {
                p[(i % 7) as usize] += 400.0; // a leak
            }
            put(d, s7.solve(&p, Some(300.0)));
        }
        if let Ok(mut p) = s5.model().port_pressures(regime, &flow) {
            for (j, x) in (0u32..).zip(p.iter_mut()) {
                *x += 5.0 * libm::sin(f64::from(5 * i + 2 * j) * 0.7);
            }
            put(d, s5.solve(&p, None));
        }
    }
}
