//! Navigator properties: rigid-motion invariance, branch-choice rules,
//! hysteresis, determinism, and robustness to arbitrary finite input.
//! The scenes are invented (see `upcurrent_tests::nav_scene`).

use nav_core::decide::{
    DecideConfig, FlowObservation, Opening, ReasonCode, Throat, WallObservation, choose_branch,
    is_unit_heading,
};
use nav_core::digest::Fnv64;
use nav_core::frame::HeadPose;
use nav_core::health::OperatingMode;
use nav_core::map::{BranchStatus, Junction, Section, dot, norm, sub};
use nav_core::navigator::{Command, NavConfig, Observation, StandardNavigator, phase_code};
use proptest::prelude::*;
use upcurrent_tests::nav_scene::{ForkBranch, Rigid, Sim, fork_scene};

const R: f64 = 0.1;

fn nav() -> Box<StandardNavigator> {
    let cfg = NavConfig::for_robot(R).validate().expect("valid config");
    Box::new(StandardNavigator::new(cfg).expect("capacities"))
}

fn dcfg() -> DecideConfig {
    NavConfig::for_robot(R).decide
}

fn three_way(narrow_q: f64) -> [ForkBranch; 3] {
    [
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
            dead_end: false,
        },
        ForkBranch {
            yaw_rad: 0.0,
            width_m: 0.2,
            dynamic_pressure_pa: narrow_q,
            dead_end: false,
        },
    ]
}

struct Run {
    reached: bool,
    visited: Vec<usize>,
    reasons: Vec<ReasonCode>,
    min_clearance_m: f64,
    last: Option<Command>,
}

fn run(sim: &mut Sim, nav: &mut StandardNavigator, steps: usize) -> Run {
    let mut reasons = Vec::new();
    let mut last = None;
    for _ in 0..steps {
        let o = sim.observe();
        let c = nav.step(&o);
        assert!(
            is_unit_heading(c.heading_map),
            "heading {:?}",
            c.heading_map
        );
        assert!(c.speed_m_per_s.is_finite() && c.speed_m_per_s >= 0.0);
        if reasons.last() != Some(&c.record.reason) {
            reasons.push(c.record.reason);
        }
        sim.apply(&c);
        last = Some(c);
        if sim.reached {
            break;
        }
    }
    Run {
        reached: sim.reached,
        visited: sim.visited[..sim.visited_count].to_vec(),
        reasons,
        min_clearance_m: sim.min_clearance_m,
        last,
    }
}

#[test]
fn avoids_the_too_narrow_strongest_branch_and_reaches_the_source() {
    // Branch 2 (segment 3) carries ten times the flow but is 0.2 m wide,
    // below 2 * 0.1 + 0.05 = 0.25 m.
    let scene = fork_scene(0.3, 40.0, &three_way(500.0));
    let mut sim = Sim::new(scene, [-6.0, 0.05, 0.0], Rigid::IDENTITY, 7, true);
    let mut n = nav();
    let r = run(&mut sim, &mut n, 20_000);
    assert!(r.reached, "reasons {:?}", r.reasons);
    assert_eq!(r.visited, [0, 2], "entered the wrong branch");
    assert!(r.reasons.contains(&ReasonCode::SampleBranch));
    assert!(
        r.min_clearance_m > R,
        "struck a wall: {}",
        r.min_clearance_m
    );
    let j = n.map().junctions.iter().next().expect("a junction");
    assert!(matches!(
        j.branches()[2].status,
        BranchStatus::Rejected(nav_core::map::RejectReason::TooNarrow { .. })
    ));
    assert!(matches!(
        j.branches()[0].status,
        BranchStatus::Rejected(nav_core::map::RejectReason::WeakerFlow { .. })
    ));
}

#[test]
fn backs_out_of_a_dead_end_and_takes_the_next_best_branch() {
    let mut b = three_way(500.0);
    b[1].dead_end = true; // the strongest wide branch is closed at its end
    let scene = fork_scene(0.3, 40.0, &b);
    let mut sim = Sim::new(scene, [-6.0, 0.05, 0.0], Rigid::IDENTITY, 3, true);
    let mut n = nav();
    let r = run(&mut sim, &mut n, 60_000);
    assert!(r.reached, "reasons {:?}", r.reasons);
    assert_eq!(r.visited, [0, 2, 0, 1]);
    assert!(r.reasons.contains(&ReasonCode::BackOut));
    assert!(r.reasons.contains(&ReasonCode::ResumeNextBranch));
    assert!(r.min_clearance_m > R);
    let j = n.map().junctions.iter().next().expect("a junction");
    assert!(matches!(j.branches()[1].status, BranchStatus::DeadEnd(_)));
}

#[test]
fn gives_up_cleanly_when_every_branch_is_a_dead_end() {
    let mut b = three_way(500.0);
    b[0].dead_end = true;
    b[1].dead_end = true;
    let scene = fork_scene(0.3, 40.0, &b);
    let mut sim = Sim::new(scene, [-6.0, 0.05, 0.0], Rigid::IDENTITY, 5, true);
    let mut n = nav();
    let r = run(&mut sim, &mut n, 90_000);
    assert!(!r.reached);
    let last = r.last.expect("commands");
    assert_eq!(last.record.reason, ReasonCode::GaveUp, "{:?}", r.reasons);
    assert_eq!(last.speed_m_per_s, 0.0);
    assert_eq!(last.mode, OperatingMode::Hold);
}

#[test]
fn holds_when_both_channels_go_silent() {
    let scene = fork_scene(0.3, 40.0, &three_way(5.0));
    let mut sim = Sim::new(scene, [-10.0, 0.0, 0.0], Rigid::IDENTITY, 1, true);
    let mut n = nav();
    let _ = run(&mut sim, &mut n, 300);
    let mut c = None;
    for k in 0..200 {
        let mut o = sim.observe();
        o.flow = None;
        o.wall = None;
        o.time_s += f64::from(k) * 0.01;
        c = Some(n.step(&o));
    }
    let c = c.unwrap();
    assert_eq!(c.mode, OperatingMode::Hold);
    assert_eq!(c.record.reason, ReasonCode::HoldChannelsUnhealthy);
    assert_eq!(c.speed_m_per_s, 0.0);
}

#[test]
fn noise_inside_the_hysteresis_band_never_makes_it_switch() {
    // Two wide branches whose flows differ by 4 %, well inside the 15 %
    // band, with 3 % noise on every dynamic pressure reading.
    let b = [
        ForkBranch {
            yaw_rad: 0.5,
            width_m: 0.5,
            dynamic_pressure_pa: 40.0,
            dead_end: false,
        },
        ForkBranch {
            yaw_rad: -0.5,
            width_m: 0.5,
            dynamic_pressure_pa: 41.6,
            dead_end: false,
        },
    ];
    for seed in 0..6 {
        let scene = fork_scene(0.3, 40.0, &b);
        let mut sim = Sim::new(scene, [-3.0, 0.0, 0.0], Rigid::IDENTITY, seed, true);
        let mut n = nav();
        let r = run(&mut sim, &mut n, 30_000);
        assert!(r.reached);
        assert!(
            !r.reasons.contains(&ReasonCode::SwitchBranch),
            "seed {seed}"
        );
        assert_eq!(r.visited.len(), 2, "seed {seed}: {:?}", r.visited);
    }
}

fn digest_run(seed: u64, steps: usize) -> u64 {
    let scene = fork_scene(0.3, 40.0, &three_way(500.0));
    let mut sim = Sim::new(scene, [-2.0, 0.03, 0.0], Rigid::IDENTITY, seed, true);
    let mut n = nav();
    let mut d = Fnv64::new();
    for _ in 0..steps {
        let o = sim.observe();
        let c = n.step(&o);
        c.digest_into(&mut d);
        sim.apply(&c);
    }
    d.finish()
}

#[test]
fn same_inputs_same_outputs_bit_for_bit() {
    assert_eq!(digest_run(11, 4000), digest_run(11, 4000));
    assert_ne!(digest_run(11, 4000), digest_run(12, 4000));
}

fn junction_with(widths: &[f64], fluxes: &[f64], samples: &[u32]) -> Junction {
    let mut j = Junction::new_at([0.0; 3], 0.0, 0, None);
    j.trunk_upstream_map = [1.0, 0.0, 0.0];
    let n = widths.len();
    for k in 0..n {
        let a = -0.8 + 1.6 * (k as f64) / (n.max(2) - 1) as f64;
        let dir = [libm::cos(a), libm::sin(a), 0.0];
        let b = j
            .merge_opening(dir, dir, widths[k], false, 0.9999)
            .expect("room");
        let br = j.branch_mut(b).unwrap();
        for _ in 0..samples[k] {
            br.evidence.add(fluxes[k]);
        }
    }
    j
}

fn branch_set() -> impl Strategy<Value = (Vec<f64>, Vec<f64>, Vec<u32>, Option<u8>)> {
    (2usize..=5).prop_flat_map(|n| {
        (
            prop::collection::vec(0.05f64..0.8, n),
            prop::collection::vec(0.0f64..20.0, n),
            prop::collection::vec(0u32..8, n),
            prop::option::of(0u8..(n as u8)),
        )
    })
}

/// Rotation axis, angle and translation.
fn rigid() -> impl Strategy<Value = Rigid> {
    (
        -1.0f64..1.0,
        -1.0f64..1.0,
        -1.0f64..1.0,
        -3.1f64..3.1,
        -100.0f64..100.0,
        -100.0f64..100.0,
        -100.0f64..100.0,
    )
        .prop_filter("axis", |(x, y, z, ..)| x * x + y * y + z * z > 0.01)
        .prop_map(|(x, y, z, a, tx, ty, tz)| Rigid::new([x, y, z], a, [tx, ty, tz]))
}

fn arb_vec() -> impl Strategy<Value = [f64; 3]> {
    [-50.0f64..50.0, -50.0f64..50.0, -50.0f64..50.0]
}

fn arb_obs() -> impl Strategy<Value = (f64, Observation)> {
    let pose = prop::option::of((
        arb_vec(),
        [-1.0f64..1.0, -1.0f64..1.0, -1.0f64..1.0, -1.0f64..1.0],
    ));
    let flow = prop::option::of((
        prop::option::of(arb_vec()),
        0.0f64..1e4,
        0.0f64..1e3,
        1e-3f64..10.0,
        0.0f64..1.0,
        any::<u32>(),
        any::<u32>(),
        any::<bool>(),
    ));
    let wall = prop::option::of((
        0u8..3,
        arb_vec(),
        0.0f64..5.0,
        prop::option::of(arb_vec()),
        prop::option::of((0.0f64..2.0, 0.0f64..10.0)),
        any::<bool>(),
        prop::collection::vec((arb_vec(), arb_vec(), 0.0f64..2.0, any::<bool>()), 0..6),
        prop::collection::vec(arb_vec(), 0..32),
        any::<u64>(),
        any::<u64>(),
    ));
    (-0.3f64..0.5, pose, flow, wall).prop_map(|(dt, pose, flow, wall)| {
        let pose = pose.map(|(p, q)| HeadPose {
            position_m: p,
            orientation_wxyz: q,
            position_sigma_m: 0.01,
            attitude_sigma_rad: 0.01,
        });
        let flow = flow.map(|(dir, q, qs, rho, var, sm, fm, deg)| FlowObservation {
            velocity_dir_map: dir,
            dir_cov_map: [[var, 0.0, 0.0], [0.0, var, 0.0], [0.0, 0.0, var]],
            dynamic_pressure_pa: q,
            dynamic_pressure_sigma_pa: qs,
            static_pressure_pa: 1e5,
            mach: 0.1,
            density_kg_per_m3: rho,
            degraded: deg,
            port_suspect_mask: sm,
            port_failed_mask: fm,
        });
        let wall = wall.map(|(kind, c, r, axis, throat, end, ops, pts, sm, fm)| {
            let mut w = WallObservation::EMPTY;
            w.section = match kind {
                0 => Section::Unknown,
                1 => Section::LowerBoundOnly { min_radius_m: r },
                _ => Section::Circle {
                    centre_m: c,
                    radius_m: r + 1e-3,
                    centre_sigma_m: 0.01,
                    radius_sigma_m: 0.01,
                },
            };
            w.conduit_axis_map = axis;
            w.throat = throat.map(|(d, a)| Throat {
                min_clear_diameter_m: d,
                distance_ahead_m: a,
            });
            w.end_ahead = end;
            for (d, m, wd, lb) in ops {
                w.push_opening(Opening {
                    direction_map: d,
                    mouth_m: m,
                    clear_width_m: wd,
                    width_is_lower_bound: lb,
                });
            }
            for p in pts {
                w.push_wall_point(p);
            }
            w.contact_suspect_mask = sm;
            w.contact_failed_mask = fm;
            w
        });
        (
            dt,
            Observation {
                time_s: 0.0,
                pose,
                flow,
                wall,
            },
        )
    })
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 64, ..ProptestConfig::default() })]

    /// A branch narrower than robot diameter + margin is never chosen,
    /// whatever its flow and whatever the incumbent.
    #[test]
    fn narrow_branch_never_chosen((w, f, s, inc) in branch_set()) {
        let cfg = dcfg();
        let j = junction_with(&w, &f, &s);
        let c = choose_branch(&j, inc, &cfg);
        if let Some(k) = c.chosen {
            prop_assert!(w[usize::from(k)] >= cfg.required_width_m());
            prop_assert!(s[usize::from(k)] > 0);
        }
        for (k, wk) in w.iter().enumerate() {
            if *wk < cfg.required_width_m() {
                let is_narrow = matches!(
                    c.status[k],
                    BranchStatus::Rejected(nav_core::map::RejectReason::TooNarrow { .. })
                );
                prop_assert!(is_narrow);
            }
        }
    }

    /// Raising the chosen branch's flow never changes the choice.
    #[test]
    fn more_flow_for_the_chosen_branch_keeps_it((w, f, s, inc) in branch_set(), gain in 1.0f64..50.0) {
        let cfg = dcfg();
        let j = junction_with(&w, &f, &s);
        let c = choose_branch(&j, inc, &cfg);
        if let Some(k) = c.chosen {
            let mut f2 = f.clone();
            f2[usize::from(k)] *= gain;
            let j2 = junction_with(&w, &f2, &s);
            prop_assert_eq!(choose_branch(&j2, inc, &cfg).chosen, Some(k));
        }
    }

    /// While every challenger stays within the hysteresis band of the
    /// incumbent, the choice stays with the incumbent.
    #[test]
    fn no_flip_inside_the_band(
        n in 2usize..=5,
        inc in 0usize..5,
        f_inc in 0.01f64..20.0,
        rel in prop::collection::vec(0.0f64..=1.0, 5),
    ) {
        let cfg = dcfg();
        let inc = inc % n;
        let w = vec![0.5; n];
        let s = vec![5u32; n];
        let f: Vec<f64> = (0..n)
            .map(|k| if k == inc { f_inc } else { f_inc * (1.0 + cfg.branch_hysteresis_frac) * rel[k] })
            .collect();
        let j = junction_with(&w, &f, &s);
        let c = choose_branch(&j, Some(inc as u8), &cfg);
        prop_assert_eq!(c.chosen, Some(inc as u8));
    }
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 12, ..ProptestConfig::default() })]

    /// Rotating and translating the whole scene leaves every decision
    /// unchanged, and the heading turns with the scene.
    #[test]
    fn rigid_motion_leaves_decisions_unchanged(g in rigid(), seed in 0u64..1000) {
        let scene = fork_scene(0.3, 40.0, &three_way(500.0));
        let mut sim = Sim::new(scene, [-1.5, 0.02, 0.0], Rigid::IDENTITY, seed, true);
        let mut a = nav();
        let mut b = nav();
        for i in 0..2500 {
            let o = sim.observe();
            let ca = a.step(&o);
            let cb = b.step(&g.observation(&o));
            prop_assert_eq!(ca.record.reason, cb.record.reason, "step {}", i);
            prop_assert_eq!(phase_code(&ca.record.phase), phase_code(&cb.record.phase));
            prop_assert_eq!(ca.mode, cb.mode);
            prop_assert_eq!(ca.reverse, cb.reverse);
            prop_assert_eq!(ca.record.speed_limit, cb.record.speed_limit);
            prop_assert_eq!(
                ca.record.branch.map(|x| (x.chosen, x.runner_up, x.held_by_hysteresis)),
                cb.record.branch.map(|x| (x.chosen, x.runner_up, x.held_by_hysteresis))
            );
            prop_assert!((ca.speed_m_per_s - cb.speed_m_per_s).abs() <= 1e-9);
            let rot = g.vec(ca.heading_map);
            prop_assert!(norm(sub(rot, cb.heading_map)) <= 1e-7, "step {}: {:?} vs {:?}", i, rot, cb.heading_map);
            sim.apply(&ca);
        }
        // The run got past the junction choice.
        prop_assert!(a.map().junctions.iter().any(|j| j.chosen.is_some()));
    }

    /// No sequence of finite, in-range inputs makes the navigator panic or
    /// emit a non-finite command; late and stale frames are handled.
    #[test]
    fn arbitrary_finite_inputs_give_finite_commands(seq in prop::collection::vec(arb_obs(), 1..120)) {
        let mut n = nav();
        let mut t = 0.0;
        for (dt, mut o) in seq {
            t += dt;
            o.time_s = t;
            let c = n.step(&o);
            prop_assert!(is_unit_heading(c.heading_map), "{:?}", c.heading_map);
            prop_assert!(c.speed_m_per_s.is_finite() && c.speed_m_per_s >= 0.0);
            prop_assert!(c.time_s.is_finite());
            if c.mode == OperatingMode::Hold {
                prop_assert_eq!(c.speed_m_per_s, 0.0);
            }
            let r = &c.record;
            let numbers = [
                r.time_s,
                r.required_standoff_m,
                r.flow_dir_sigma_rad,
                r.dynamic_pressure_pa,
                r.flow_weak_for_s,
            ];
            prop_assert!(numbers.iter().all(|v| v.is_finite()), "{:?}", r);
            let options = [
                r.standoff_m,
                r.section_radius_m,
                r.centre_offset_m,
                r.nearest_wall_m,
                r.throat_diameter_m,
                r.throat_distance_m,
                r.ridge_gradient_per_m,
            ];
            prop_assert!(options.iter().flatten().all(|v| v.is_finite()), "{:?}", r);
            if let Some(u) = r.upstream_map {
                prop_assert!((dot(u, u) - 1.0).abs() < 1e-9, "{:?}", u);
            }
        }
    }
}

/// Branches seen through the flow only (`nav_core::flow_turn`): a guessed
/// branch has no width and no flow measured, yet is eligible (never
/// rejected as too narrow or without flow), ranked below every branch with
/// measured flow, and chosen once nothing measured is left.
#[test]
fn guessed_branches_come_after_every_measured_one() {
    use nav_core::map::BranchOrigin;
    let cfg = dcfg();
    let mut j = junction_with(&[0.5], &[3.0], &[cfg.min_branch_samples]);
    let g = j
        .add_unmeasured([0.8, 0.6, 0.0], [0.0; 3], BranchOrigin::Guessed, 0.9)
        .expect("room");
    // Too close to the felt branch's direction: not added again.
    let felt = j.branches()[0].direction_map;
    assert_eq!(
        j.add_unmeasured(felt, [0.0; 3], BranchOrigin::Guessed, 0.9),
        None
    );
    let c = choose_branch(&j, None, &cfg);
    assert_eq!(c.chosen, Some(0), "the measured branch first");
    assert!(
        matches!(
            c.status[usize::from(g)],
            BranchStatus::Rejected(nav_core::map::RejectReason::WeakerFlow { .. })
        ),
        "{:?}",
        c.status[usize::from(g)]
    );
    // The measured one dead: the guess is chosen, not rejected for width
    // or flow.
    j.branch_mut(0).unwrap().status = BranchStatus::DeadEnd(nav_core::map::DeadEndCause::Blocked);
    let c = choose_branch(&j, None, &cfg);
    assert_eq!(c.chosen, Some(g));
    // A felt branch with no flow measured is still out for want of flow.
    let k = junction_with(&[0.5], &[0.0], &[0]);
    assert!(matches!(
        choose_branch(&k, None, &cfg).status[0],
        BranchStatus::Rejected(nav_core::map::RejectReason::NoFlow { .. })
    ));
}
