//! Proves that the `nav-core` API performs no heap allocation.
//!
//! A counting global allocator wraps the system one; each check runs a core
//! entry point and asserts that the count for this thread did not move.
//! Every new core entry point must be added here.
#![allow(unsafe_code)] // a GlobalAlloc impl is unsafe by definition

use std::alloc::{GlobalAlloc, Layout, System};
use std::cell::Cell;

struct Counting;

thread_local! {
    static ALLOCS: Cell<u64> = const { Cell::new(0) };
}

// SAFETY: forwards every call unchanged to `System`; the thread-local
// counter is a const-initialised `Cell` and never allocates.
unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        ALLOCS.with(|c| c.set(c.get() + 1));
        // SAFETY: same contract as the caller's.
        unsafe { System.alloc(layout) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        // SAFETY: same contract as the caller's.
        unsafe { System.dealloc(ptr, layout) }
    }
    unsafe fn alloc_zeroed(&self, layout: Layout) -> *mut u8 {
        ALLOCS.with(|c| c.set(c.get() + 1));
        // SAFETY: same contract as the caller's.
        unsafe { System.alloc_zeroed(layout) }
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        ALLOCS.with(|c| c.set(c.get() + 1));
        // SAFETY: same contract as the caller's.
        unsafe { System.realloc(ptr, layout, new_size) }
    }
}

#[global_allocator]
static GLOBAL: Counting = Counting;

/// Heap allocations made by this thread while `f` runs.
fn allocations_during<R>(f: impl FnOnce() -> R) -> (u64, R) {
    let before = ALLOCS.with(Cell::get);
    let r = f();
    let after = ALLOCS.with(Cell::get);
    (after - before, r)
}

#[test]
fn the_counter_sees_allocations() {
    // Guard against a counter that never counts: a Vec must register.
    let (n, v) = allocations_during(|| vec![1u8; 64]);
    assert!(n >= 1, "counting allocator missed a Vec allocation");
    assert_eq!(v.len(), 64);
}

#[test]
fn gas_relations_do_not_allocate() {
    let (n, digest) = allocations_during(upcurrent_tests::core_workload_digest);
    assert_eq!(n, 0, "gas workload allocated {n} times");
    assert_ne!(digest, 0);
}

#[test]
fn frame_handling_does_not_allocate() {
    use nav_core::frame::{Contact, SensorFrame};
    let (n, count) = allocations_during(|| {
        let mut f: SensorFrame<7, 8, 32> = SensorFrame::empty(1.0);
        for k in 0..40u16 {
            let _ = f.push_contact(Contact {
                module: k % 4,
                sensor: k,
                force_n: 1.0,
                normal_module: None,
            });
        }
        f.contacts().len()
    });
    assert_eq!(n, 0);
    assert_eq!(count, 32);
}

#[test]
fn navigator_does_not_allocate() {
    use nav_core::decide::{FlowObservation, Opening, Throat, WallObservation};
    use nav_core::frame::HeadPose;
    use nav_core::map::Section;
    use nav_core::navigator::{NavConfig, Observation, StandardNavigator};
    let cfg = NavConfig::for_robot(0.1).validate().expect("valid");
    let (n, finite) = allocations_during(|| {
        // Built, then stepped: neither may touch the heap.
        let mut nav = StandardNavigator::new(cfg).expect("capacities");
        // A small LCG drives pathological but finite frames: random poses,
        // flows, sections, openings, throats, masks and time jumps, so every
        // branch of the frame handling runs.
        let mut s: u64 = 0x1234_5678;
        let mut r = move || {
            s = s
                .wrapping_mul(6_364_136_223_846_793_005)
                .wrapping_add(1_442_695_040_888_963_407);
            f64::from(u32::try_from(s >> 40).unwrap_or(0)) / f64::from(1u32 << 24)
        };
        let mut t = 0.0;
        let mut ok = true;
        for _ in 0..3000 {
            t += r() * 0.05 - 0.01;
            let mut w = WallObservation::EMPTY;
            w.section = if r() < 0.5 {
                Section::Circle {
                    centre_m: [r() * 4.0, r() - 0.5, 0.0],
                    radius_m: 0.05 + r(),
                    centre_sigma_m: 0.01,
                    radius_sigma_m: 0.01,
                }
            } else {
                Section::LowerBoundOnly { min_radius_m: r() }
            };
            w.throat = (r() < 0.1).then(|| Throat {
                min_clear_diameter_m: r(),
                distance_ahead_m: r() * 3.0,
            });
            w.end_ahead = r() < 0.02;
            for _ in 0..(r() * 4.0) as usize {
                let a = r() * 6.0;
                w.push_opening(Opening {
                    direction_map: [libm::cos(a), libm::sin(a), 0.0],
                    mouth_m: [r() * 4.0, 0.0, 0.0],
                    clear_width_m: r(),
                    width_is_lower_bound: r() < 0.5,
                });
            }
            for _ in 0..8 {
                w.push_wall_point([r() * 4.0, r() - 0.5, r() - 0.5]);
            }
            let o = Observation {
                time_s: t,
                pose: (r() < 0.95).then(|| HeadPose {
                    position_m: [r() * 4.0, r() * 0.2 - 0.1, 0.0],
                    orientation_wxyz: [1.0, 0.0, 0.0, r() - 0.5],
                    position_sigma_m: 0.01,
                    attitude_sigma_rad: 0.01,
                }),
                flow: (r() < 0.9).then(|| FlowObservation {
                    velocity_dir_map: (r() < 0.95).then(|| [-1.0, r() - 0.5, 0.0]),
                    dir_cov_map: [[1e-3, 0.0, 0.0], [0.0, 1e-3, 0.0], [0.0, 0.0, 1e-3]],
                    dynamic_pressure_pa: r() * 60.0,
                    dynamic_pressure_sigma_pa: 1.0,
                    static_pressure_pa: 1e5,
                    mach: 0.02,
                    density_kg_per_m3: 1.2,
                    degraded: r() < 0.1,
                    port_suspect_mask: u32::from(r() < 0.05),
                    port_failed_mask: 0,
                }),
                wall: (r() < 0.9).then_some(w),
            };
            let c = nav.step(&o);
            ok &= c.heading_map.iter().all(|v| v.is_finite()) && c.speed_m_per_s.is_finite();
        }
        ok
    });
    assert_eq!(n, 0, "navigator allocated {n} times");
    assert!(finite);
}

#[test]
fn tactile_pipeline_does_not_allocate() {
    use nav_core::body::{Body, BodyConfig, ModuleSpec, SensorSpec};
    use nav_core::frame::{Contact, HeadPose, JointAngles, SensorFrame};
    use nav_core::tactile::ellipse::{direct_ellipse, geometric_ellipse};
    use nav_core::tactile::fit::{
        AlgebraicMethod, LmSettings, algebraic_circle, algebraic_circle_general,
        angular_coverage_rad, geometric_circle,
    };
    use nav_core::tactile::{
        OpeningReport, OpeningSettings, SectionSettings, TactileConfig, TactileMap, ThroatSettings,
        fit_plane_section,
    };
    let (n, checksum) = allocations_during(|| {
        let mut sum = 0.0;
        let mut cfg = BodyConfig::<3, 24>::uniform(
            3,
            ModuleSpec {
                length_m: 0.25,
                radius_m: 0.05,
            },
        );
        for m in 0..3u16 {
            for j in 0..8u16 {
                cfg.push_sensor(SensorSpec {
                    module: m,
                    axial_m: 0.12,
                    angle_rad: f64::from(j) * 0.785,
                    cap_polar_rad: None,
                });
            }
        }
        let body = Body::new(cfg).expect("body");
        let mut map = TactileMap::<128>::new(TactileConfig::default()).expect("map");
        for k in 0..60u32 {
            let roll = 0.41 * f64::from(k);
            let mut f: SensorFrame<0, 2, 8> = SensorFrame::empty(0.1 * f64::from(k));
            f.pose = Some(HeadPose {
                position_m: [0.01 * f64::from(k), 0.2 * roll.cos(), 0.2 * roll.sin()],
                orientation_wxyz: [(0.5 * roll).cos(), (0.5 * roll).sin(), 0.0, 0.0],
                position_sigma_m: 0.001,
                attitude_sigma_rad: 0.001,
            });
            f.joints = Some([JointAngles::default(); 2]);
            for m in 0..3u16 {
                f.push_contact(Contact {
                    module: m,
                    sensor: 0,
                    force_n: 1.0,
                    normal_module: Some([0.0, 1.0, 0.0]),
                });
            }
            let r = map.ingest(&f, &body).expect("ingest");
            sum += r.wall_points as f64;
        }
        // A rejected frame.
        let bad: SensorFrame<0, 2, 8> = SensorFrame::empty(-1.0);
        assert!(map.ingest(&bad, &body).is_err());
        let pose = HeadPose {
            position_m: [0.6, 0.0, 0.0],
            orientation_wxyz: [1.0, 0.0, 0.0, 0.0],
            position_sigma_m: 0.0,
            attitude_sigma_rad: 0.0,
        };
        let poses = body
            .module_poses(&pose, &[JointAngles::default(); 2])
            .expect("poses");
        let set = SectionSettings::default();
        let st = [
            body.station(&poses, 0.1).expect("station"),
            body.station(&poses, 0.3).expect("station"),
            body.station(&poses, 0.5).expect("station"),
        ];
        for s in &st {
            let sec = map.section_at(s, &set);
            sum += sec.plane.coverage_rad;
            let o: OpeningReport<4> = map.openings(&sec, &set, &OpeningSettings::default());
            sum += o.count as f64;
        }
        let th = map.throat(&st, &set, &ThroatSettings::default());
        sum += th.slope;
        // The plane fits directly.
        let mut pts = [[0.0f64; 2]; 30];
        for (i, p) in pts.iter_mut().enumerate() {
            let t = 0.21 * i as f64;
            *p = [0.5 * t.cos() + 0.001 * (3.0 * t).sin(), 0.4 * t.sin()];
        }
        for m in [
            AlgebraicMethod::Kasa,
            AlgebraicMethod::Pratt,
            AlgebraicMethod::Hyper,
        ] {
            sum += algebraic_circle(&pts, m).expect("fit").circle.radius_m;
            sum += algebraic_circle_general(&pts, m)
                .expect("fit")
                .circle
                .radius_m;
        }
        let h = algebraic_circle(&pts, AlgebraicMethod::Hyper).expect("fit");
        sum += geometric_circle(&pts, &h.circle, &LmSettings::default())
            .expect("fit")
            .circle
            .radius_m;
        sum += angular_coverage_rad(&pts, &h.circle.centre);
        let e = direct_ellipse(&pts).expect("ellipse");
        sum += geometric_ellipse(&pts, &e, &LmSettings::default())
            .expect("ellipse")
            .ellipse
            .semi_minor_m;
        sum += fit_plane_section(&pts, &set.fit).coverage_rad;
        sum
    });
    assert_eq!(n, 0, "tactile pipeline allocated {n} times");
    assert!(checksum.is_finite() && checksum > 0.0);
}

#[test]
fn probe_does_not_allocate() {
    use nav_core::gas::IdealGas;
    use nav_core::probe::calib::{CalSample, CalScheme, CalTable, build_table};
    use nav_core::probe::chi2::chi_square_quantile_upper;
    use nav_core::probe::{
        FlowCondition, PortSet, ProbeLayout, ProbeSolver, Regime, SolveOptions, SolverConfig,
        Start, deg,
    };
    let gas = IdealGas::DRY_AIR;
    // Calibration table built (with std, allocating) outside the check.
    let layout7 = ProbeLayout::seven_port(deg(40.0), 5.0).unwrap();
    let model = ProbeSolver::new(layout7, gas, SolverConfig::default()).unwrap();
    let mut sweep = Vec::new();
    for i in 0..=20u32 {
        let t = deg(3.0 * f64::from(i));
        let steps = if i == 0 {
            1
        } else {
            (120.0 * t.sin()).ceil() as u32
        };
        for j in 0..steps {
            let ph = 2.0 * std::f64::consts::PI * f64::from(j) / f64::from(steps);
            let v = [-t.cos(), -t.sin() * ph.cos(), -t.sin() * ph.sin()];
            let f = FlowCondition::from_dynamic_pressure(&gas, v, 1e5, 500.0).unwrap();
            let p = model
                .model()
                .port_pressures(Regime::Incompressible, &f)
                .unwrap();
            sweep.push(CalSample {
                velocity_unit: v,
                total_pressure_pa: 1e5 + 500.0,
                static_pressure_pa: 1e5,
                pressures_pa: p,
            });
        }
    }
    let table = build_table(CalScheme::SevenHoleGallington, &sweep).unwrap();

    let (n, ok) = allocations_during(|| {
        let s7 = ProbeSolver::new(layout7, gas, SolverConfig::default()).unwrap();
        let layout5 = ProbeLayout::five_port(deg(45.0), 5.0).unwrap();
        let s5 = ProbeSolver::new(layout5, gas, SolverConfig::default()).unwrap();
        let v = [-0.9, -0.3, -(1.0f64 - 0.81 - 0.09).sqrt()];
        let f = FlowCondition::from_dynamic_pressure(&gas, v, 101_325.0, 500.0).unwrap();
        let mut p7 = s7
            .model()
            .port_pressures(Regime::Incompressible, &f)
            .unwrap();
        let p5 = s5
            .model()
            .port_pressures(Regime::Incompressible, &f)
            .unwrap();
        let a = s7.solve(&p7, Some(293.0)).is_ok();
        let b = s5.solve(&p5, Some(293.0)).is_ok();
        p7[3] += 300.0; // leak: chi-square test and leave-one-out isolation
        let c = s7.solve(&p7, None).is_ok();
        let opts = SolveOptions {
            excluded: PortSet::EMPTY.with(3),
            start: Some(Start { velocity_unit: v }),
        };
        let d = s7.solve_with(&p7, None, &opts).is_ok();
        let e = s7.solve_slice(&[1e5; 3], None).is_err();
        let sup = FlowCondition {
            velocity_unit: v,
            static_pressure_pa: 2e4,
            mach: 2.0,
        };
        let ps = s7.model().port_pressures(Regime::Supersonic, &sup).unwrap();
        let g = s7.solve(&ps, Some(400.0)).is_ok();
        let t = CalTable::new(CalScheme::SevenHoleGallington, &table).unwrap();
        let h = t
            .evaluate(
                &s7.model()
                    .port_pressures(Regime::Incompressible, &f)
                    .unwrap(),
            )
            .is_ok();
        let k = chi_square_quantile_upper(3, 1e-3).is_ok();
        a && b && c && d && e && g && h && k
    });
    assert_eq!(n, 0, "probe allocated {n} times");
    assert!(ok);
}

#[test]
fn flow_window_does_not_allocate() {
    // The windowed flow estimate: construction, frames (with a port left
    // out and a NaN port), refused frames, and the estimate.
    use nav_core::flow_window::{FlowWindow, FlowWindowConfig};
    use nav_core::frame::HeadPose;
    use nav_core::probe::{ProbeLayout, deg};
    let layout = ProbeLayout::seven_port(deg(40.0), 0.03).unwrap();
    let pose = HeadPose {
        position_m: [0.0; 3],
        orientation_wxyz: [1.0, 0.0, 0.0, 0.0],
        position_sigma_m: 0.0,
        attitude_sigma_rad: 0.0,
    };
    let (n, ok) = allocations_during(|| {
        let mut win = FlowWindow::<7>::new(FlowWindowConfig::default()).unwrap();
        let mut good = 0;
        for i in 0..400u32 {
            let k = f64::from(i);
            let mut p = [101_325.0; 7];
            for (j, o) in p.iter_mut().enumerate() {
                *o += 0.05 * (1.0 - 2.25 * (j as f64 / 7.0)) + 0.03 * (1.3 * k + j as f64).sin();
            }
            if i == 7 {
                p[2] = f64::NAN;
            }
            let mut q = pose;
            q.position_m[0] = 0.001 * k;
            if win.add(0.01 * k, &p, &layout, &q, 1.2, 1 << 4).is_ok() {
                good += 1;
            }
        }
        let late = win.add(0.0, &[1e5; 7], &layout, &pose, 1.2, 0).is_err();
        good == 400 && late && win.estimate().dynamic_pressure_pa.is_finite()
    });
    assert_eq!(n, 0, "flow window allocated {n} times");
    assert!(ok);
}

#[test]
fn frame_navigator_does_not_allocate() {
    use nav_core::frame::{Contact, SensorFrame};
    use nav_core::onboard::{FrameNavigator, StandardFrameNavigator};
    use upcurrent_tests::frame_scene::{Conduit, CostFrameNavigator, FrameScene, Gait, Robot};
    use upcurrent_tests::nav_scene::Rigid;
    let placement = Rigid::new([0.4, 0.1, 1.0], -0.8, [2.0, -1.0, 0.3]);
    let (n, ok) = allocations_during(|| {
        // The scene makes frames without the heap too; built in here so
        // nothing is hidden outside the count.
        let mut scene = FrameScene::new(
            Conduit::winding(),
            Robot::DEMO,
            Gait::ROCKING,
            placement,
            0.5,
            5,
        );
        // Construction (both capacity sets), then stepping.
        let small = CostFrameNavigator::new(scene.onboard_config::<8, 32>()).is_ok();
        let mut nav: StandardFrameNavigator =
            FrameNavigator::new(scene.onboard_config::<8, 48>()).expect("valid config");
        let mut ok = small;
        for k in 0..400u32 {
            let mut f: SensorFrame<7, 7, 48> = scene.next_frame();
            // Partial and malformed frames too: probe silent, a NaN port,
            // a contact on a missing module, no pose.
            match k % 50 {
                10..=19 => f.port_pressures_pa = None,
                23 => {
                    if let Some(p) = f.port_pressures_pa.as_mut() {
                        p[0] = f64::NAN;
                    }
                }
                31 => {
                    let _ = f.push_contact(Contact {
                        module: 12,
                        sensor: 0,
                        force_n: 2.0,
                        normal_module: None,
                    });
                }
                40 => f.pose = None,
                _ => {}
            }
            let c = nav.step(&f);
            ok &= c.heading_map.iter().all(|v| v.is_finite()) && c.speed_m_per_s.is_finite();
        }
        ok && nav.counters().steps == 400 && nav.counters().tactile_errors > 0
    });
    assert_eq!(n, 0, "frame navigator allocated {n} times");
    assert!(ok);
}

#[test]
fn frame_navigator_init_in_place_does_not_allocate() {
    use nav_core::frame::SensorFrame;
    use nav_core::onboard::StandardFrameNavigator;
    use std::mem::MaybeUninit;
    use upcurrent_tests::frame_scene::{Conduit, FrameScene, Gait, Robot};
    use upcurrent_tests::nav_scene::Rigid;
    // The slot is the caller's (allocated here, outside the count).
    let mut slot: Box<MaybeUninit<StandardFrameNavigator>> = Box::new_uninit();
    let placement = Rigid::new([0.4, 0.1, 1.0], -0.8, [2.0, -1.0, 0.3]);
    let (n, steps) = allocations_during(|| {
        let mut scene = FrameScene::new(
            Conduit::winding(),
            Robot::DEMO,
            Gait::ROCKING,
            placement,
            0.5,
            5,
        );
        let nav = StandardFrameNavigator::init(&mut slot, scene.onboard_config::<8, 48>())
            .expect("valid config");
        for _ in 0..100u32 {
            let f: SensorFrame<7, 7, 48> = scene.next_frame();
            let _ = nav.step(&f);
        }
        nav.counters().steps
    });
    assert_eq!(n, 0, "init and steps allocated {n} times");
    assert_eq!(steps, 100);
}

#[test]
fn stamp_and_pose_checks_do_not_allocate() {
    use nav_core::frame::HeadPose;
    use nav_core::trust::{ClockConfig, ClockVerdict, FrameClock, PoseLimits};
    let (n, used) = allocations_during(|| {
        let mut clock = FrameClock::new(ClockConfig::DEFAULT, 0.2);
        let limits = PoseLimits::DEFAULT;
        let pose = HeadPose {
            position_m: [1.0, 2.0, 3.0],
            orientation_wxyz: [1.0, 0.0, 0.0, 0.0],
            position_sigma_m: 0.01,
            attitude_sigma_rad: 0.01,
        };
        let mut used = 0u32;
        for k in 0..400u32 {
            // Ordinary, then NaN, stuck, reset and jumped stamps.
            let t = match k / 80 {
                0 => f64::from(k) * 0.01,
                1 => f64::NAN,
                2 => 0.79,
                3 => f64::from(k - 240) * 0.01,
                _ => 1.0e6 + f64::from(k) * 0.01,
            };
            if matches!(clock.judge(t), ClockVerdict::Use { .. }) {
                used += 1;
            }
            let _ = limits.plausible(&pose, t, Some((pose.position_m, 0.0)));
        }
        used
    });
    assert_eq!(n, 0, "stamp and pose checks allocated {n} times");
    assert!(used > 80, "{used} frames used");
}
