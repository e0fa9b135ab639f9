//! Ground truth: wall samples and standoff, the true path, wrong branches.

use replay::sim::vec3;
use replay::sim::{MotionCommand, Sim, demos};

fn straight(spacing: f64) -> Sim {
    let src = format!(
        r#"[scenario]
name = "straight"
[gas]
species = "air"
temperature_k = 290.0
[[node]]
id = "a"
position_m = [0.0, 0.0, 0.0]
kind = "exit"
ambient_pressure_pa = 101325.0
[[node]]
id = "b"
position_m = [6.0, 0.0, 0.0]
kind = "source"
stagnation_pressure_pa = 101330.0
[[conduit]]
id = "c"
from = "a"
to = "b"
radius_m = 0.3
[robot]
speed_limit_m_per_s = 0.3
module_count = 2
module_length_m = 0.2
module_radius_m = 0.05
[robot.probe]
layout = "seven_port"
head_radius_m = 0.03
[start]
position_m = [2.0, 0.1, 0.0]
[scoring]
wall_sample_spacing_m = {spacing}
"#
    );
    Sim::from_toml_str(&src).unwrap()
}

/// In a straight tube of radius R the distance from a point at rho from the
/// axis to the wall is R - rho (geometry); the nearest wall sample is never
/// nearer, and with 1 cm spacing no more than half a spacing diagonal farther.
#[test]
fn standoff_from_wall_samples_matches_geometry() {
    let sim = straight(0.01);
    let w = sim.walls();
    assert!(w.len() > 10_000);
    for (x, y, z) in [
        (2.0, 0.1, 0.0),
        (3.0, -0.2, 0.05),
        (1.0, 0.0, 0.25),
        (4.5, 0.17, -0.17),
    ] {
        let rho = f64::hypot(y, z);
        let d = w.distance_m([x, y, z]);
        assert!(d >= 0.3 - rho - 1e-9, "{d}");
        assert!(d <= 0.3 - rho + 0.0071, "{d} at {x} {y} {z}");
    }
    // Every sample lies on the wall: none inside the tube (seen from the
    // axis, every millimetre along it away from the end caps, the nearest
    // sample is a full radius away) and none outside it (seen from 0.2 m
    // into the rock, every 5 mm and every 1/128 turn, the nearest sample
    // is at least 0.2 m away).
    for i in 0..5400 {
        let x = 0.3 + 0.001 * f64::from(i);
        let d = w.distance_m([x, 0.0, 0.0]);
        assert!(d >= 0.3 - 1e-9, "a sample {d} m from the axis at x = {x}");
    }
    for i in 0..1080 {
        let x = 0.3 + 0.005 * f64::from(i);
        for k in 0..128 {
            let a = std::f64::consts::TAU * f64::from(k) / 128.0;
            let d = w.distance_m([x, 0.5 * a.cos(), 0.5 * a.sin()]);
            assert!(
                d >= 0.2 - 1e-9,
                "a sample outside the wall near x = {x}, {a} rad"
            );
        }
    }
    let g = &sim.world().geometry;
    let o = sim.outcome();
    // Start at 0.1 m off axis: standoff 0.3 - 0.1 - 0.05 (head radius).
    assert!((o.min_standoff_m - 0.15).abs() < 0.0075, "{o:?}");
    assert!(g.clearance_m([2.0, 0.3, 0.0]).abs() < 1e-12);
}

/// The cap at a blind end is wall too: standoff toward the end node.
#[test]
fn blind_end_caps_are_sampled() {
    let sim = straight(0.01);
    // 0.2 m beyond the end node, inside the hemispherical cap of radius
    // 0.3 m about (6, 0, 0): the cap is 0.1 m away; without cap samples the
    // nearest wall would be the end rim, sqrt(0.2^2 + 0.3^2) = 0.36 m away.
    let d = sim.walls().distance_m([6.2, 0.0, 0.0]);
    assert!((d - 0.1).abs() < 0.0075, "{d}");
    assert!((sim.world().geometry.clearance_m([6.2, 0.0, 0.0]) - 0.1).abs() < 1e-12);
}

#[test]
fn true_path_through_the_mine() {
    let sim = Sim::from_demo("saltpetre-drift").unwrap();
    let sc = sim.scenario();
    let p = sim.true_path().unwrap();
    let ids: Vec<&str> = p
        .conduits
        .iter()
        .map(|&c| sc.conduits[c].id.as_str())
        .collect();
    assert_eq!(
        ids,
        ["main-drift", "north-drift", "upper-drift", "raise-drift"]
    );
    assert_eq!(sc.nodes[p.source].id, "lamp-raise");
    assert!(p.passable);
    // The polyline starts at the start point's foot and ends at the source.
    assert!(vec3::dist(p.polyline_m[0], sc.start.position_m) < 1e-9);
    assert!(vec3::dist(*p.polyline_m.last().unwrap(), sc.nodes[p.source].position_m) < 1e-9);
}

/// Driving into the blind powder spur counts one wrong branch, once.
#[test]
fn wrong_branch_is_counted_once_per_entry() {
    let mut sim = Sim::from_demo("saltpetre-drift").unwrap();
    let sc = sim.scenario().clone();
    let cross = sc
        .nodes
        .iter()
        .find(|n| n.id == "crosscut")
        .unwrap()
        .position_m;
    let store = sc
        .nodes
        .iter()
        .find(|n| n.id == "powder-store")
        .unwrap()
        .position_m;
    for _ in 0..12_000 {
        let head = sim.true_state().head_position_m;
        let target = if head[0] < cross[0] - 0.05 && head[1] < 0.2 {
            cross
        } else {
            store
        };
        let h = vec3::unit(vec3::sub(target, head)).unwrap_or([0.0, 1.0, 0.0]);
        sim.step(&MotionCommand {
            heading_map: h,
            speed_m_per_s: 0.3,
        });
    }
    let o = sim.outcome();
    assert_eq!(o.wrong_branches, 1, "{o:?}");
    assert!(!o.reached_source);
    let head = sim.true_state().head_position_m;
    assert!(head[1] > 4.0, "{head:?}");
    let _ = demos::DEMOS;
}

/// The local field is continuous along the true path through junctions and
/// bends (mixing zones blend the conduits meeting there): between samples
/// 1 cm apart the velocity changes by far less than the mean speed.
#[test]
fn field_is_continuous_along_the_path() {
    let sim = Sim::from_demo("saltpetre-drift").unwrap();
    let w = sim.world();
    let p = sim.true_path().unwrap();
    let mut prev: Option<[f64; 3]> = None;
    let mut worst: f64 = 0.0;
    let mut s = 0.0;
    while s < p.length_m {
        let i = p
            .arc_m
            .partition_point(|&a| a < s)
            .clamp(1, p.polyline_m.len() - 1);
        let (a0, a1) = (p.arc_m[i - 1], p.arc_m[i]);
        let f = if a1 > a0 { (s - a0) / (a1 - a0) } else { 0.0 };
        let pt = vec3::axpy(
            p.polyline_m[i - 1],
            f,
            vec3::sub(p.polyline_m[i], p.polyline_m[i - 1]),
        );
        let v = w.sample(pt).velocity_m_per_s;
        if let Some(q) = prev {
            worst = worst.max(vec3::dist(v, q));
        }
        prev = Some(v);
        s += 0.01;
    }
    // Main-drift speeds are about 1.3 m/s on the centreline; a kink at a
    // bend of 30 deg would jump by about 0.7 m/s.
    assert!(worst < 0.04, "largest jump {worst} m/s per cm");
}
