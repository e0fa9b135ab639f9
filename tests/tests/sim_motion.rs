//! Closed-loop motion: the oracle reaches the source in every demo, the
//! speed limit holds, walls stop the head (and that is recorded), the trap's
//! narrow slot cannot be entered, the reported joints follow the frame
//! convention, backing out retraces the trail.

use nalgebra::{Matrix3, Rotation3, UnitQuaternion, Vector3};
use replay::sim::vec3;
use replay::sim::{MotionCommand, Oracle, Sim, demos};

#[test]
fn oracle_reaches_the_source_in_every_demo() {
    for (key, _) in demos::DEMOS {
        let mut sim = Sim::from_demo(key).unwrap();
        let mut o = Oracle::new(&sim);
        let limit = (sim.scenario().duration_s / sim.time_step_s()) as usize;
        for _ in 0..limit {
            let c = o.command(&sim);
            sim.step(&c);
            if sim.outcome().reached_source {
                break;
            }
        }
        let out = sim.outcome();
        assert!(out.reached_source, "{key}: {out:?}");
        assert!(out.true_path_passable, "{key}");
        assert_eq!(out.wrong_branches, 0, "{key}");
        assert_eq!(out.wall_strikes, 0, "{key}");
        assert!(out.min_standoff_m > 0.0, "{key}: {out:?}");
        // The oracle travels about the path length (it stops short of the node).
        assert!(
            out.distance_travelled_m < out.true_path_length_m + 0.2,
            "{key}: {out:?}"
        );
        assert!(
            out.distance_travelled_m > out.true_path_length_m - 1.0,
            "{key}: {out:?}"
        );
        // Minutes, not hours, of robot time.
        let t = out.reached_at_s.unwrap();
        assert!(t > 30.0 && t < 600.0, "{key}: {t} s");
    }
}

#[test]
fn speed_limit_and_hold() {
    let mut sim = Sim::from_demo("saltpetre-drift").unwrap();
    let vmax = sim.robot_spec().max_speed_m_per_s;
    let dt = sim.time_step_s();
    for _ in 0..100 {
        let before = sim.true_state().head_position_m;
        sim.step(&MotionCommand {
            heading_map: [1.0, 0.0, 0.0],
            speed_m_per_s: 50.0,
        });
        let d = vec3::dist(before, sim.true_state().head_position_m);
        assert!(d <= vmax * dt * (1.0 + 1e-12), "{d}");
    }
    for _ in 0..50 {
        sim.step(&MotionCommand::hold());
    }
    assert!((sim.outcome().time_held_s - 0.5).abs() < 1e-9);
}

/// Wren's Slot: steering into the slot (radius 0.045 m) with a 0.06 m robot
/// stops the head at the slot's mouth with a wall strike; the true path
/// leads up the gallery to the weaker source instead.
#[test]
fn the_slot_is_too_narrow() {
    let mut sim = Sim::from_demo("wrens-slot").unwrap();
    let sc = sim.scenario().clone();
    let slot = sc.conduits.iter().position(|c| c.id == "slot").unwrap();
    let path = sim.true_path().unwrap();
    assert!(path.passable);
    assert_eq!(sc.nodes[path.source].id, "cold-cistern");
    assert!(!path.conduits.contains(&slot));
    let fork = sc.nodes.iter().find(|n| n.id == "fork").unwrap().position_m;
    let spring = sc
        .nodes
        .iter()
        .find(|n| n.id == "spring-chamber")
        .unwrap()
        .position_m;
    // Drive to the fork along the drift, then straight at the spring.
    for _ in 0..6000 {
        let head = sim.true_state().head_position_m;
        let target = if head[0] < fork[0] - 0.3 {
            fork
        } else {
            spring
        };
        let h = vec3::unit(vec3::sub(target, head)).unwrap();
        sim.step(&MotionCommand {
            heading_map: h,
            speed_m_per_s: 0.3,
        });
    }
    let out = sim.outcome();
    assert!(!out.reached_source);
    assert!(
        out.wall_strikes >= 1 && out.wall_contact_steps > 100,
        "{out:?}"
    );
    // The head never got more than a few centimetres into the slot.
    let g = &sim.world().geometry;
    let head = sim.true_state().head_position_m;
    let into = vec3::dist(head, fork);
    assert!(into < 0.65, "head {into} m from the fork");
    let h = g.best_hit(head).unwrap();
    assert!(h.conduit as usize != slot || h.station_m < 0.1, "{h:?}");
}

fn rot(q: [f64; 4]) -> Matrix3<f64> {
    *UnitQuaternion::from_quaternion(nalgebra::Quaternion::new(q[0], q[1], q[2], q[3]))
        .to_rotation_matrix()
        .matrix()
}

/// Rebuild every module origin from the reported head pose and joint angles
/// with the shared convention, origin_{k+1} = origin_k + R_k (-L_k, 0, 0),
/// R_{k+1} = R_k Rz(yaw_k) Ry(pitch_k) (ideal sensors), and compare with the
/// true chain after a winding drive.
#[test]
fn reported_joints_follow_the_frame_convention() {
    let text = demos::demo_text("saltpetre-drift").unwrap().to_string() + "\n"; // sensors made ideal below
    let text = text
        .replace(
            "position_walk_m_per_sqrt_m = 0.005",
            "position_walk_m_per_sqrt_m = 0.0",
        )
        .replace(
            "attitude_walk_rad_per_sqrt_m = 0.002",
            "attitude_walk_rad_per_sqrt_m = 0.0",
        )
        .replace("scale_error = 0.01", "scale_error = 0.0")
        .replace(
            "[sensors.contact]",
            "[sensors.joints]\nnoise_rad = 0.0\n\n[sensors.contact]",
        );
    let mut sim = Sim::from_toml_str(&text).unwrap();
    let mut o = Oracle::new(&sim);
    let lengths: Vec<f64> = sim
        .robot_spec()
        .modules
        .iter()
        .map(|m| m.length_m)
        .collect();
    let mut checked = 0;
    let mut max_bend: f64 = 0.0;
    for i in 0..8000 {
        let c = o.command(&sim);
        let f = sim.step(&c).clone();
        if i % 100 != 0 {
            continue;
        }
        let (Some(pose), Some(joints)) = (f.pose, f.joints) else {
            continue;
        };
        let mut r = rot(pose.orientation_wxyz);
        let mut p = Vector3::from(pose.position_m);
        for (k, j) in joints.iter().enumerate() {
            p += r * Vector3::new(-lengths[k], 0.0, 0.0);
            r = r
                * Rotation3::from_axis_angle(&Vector3::z_axis(), j.yaw_rad).matrix()
                * Rotation3::from_axis_angle(&Vector3::y_axis(), j.pitch_rad).matrix();
            let truth = sim.body().origins[k + 1];
            assert!(
                (p - Vector3::from(truth)).norm() < 1e-9,
                "module {} at step {i}",
                k + 1
            );
            assert!((r - sim.body().rotations[k + 1]).norm() < 1e-9);
            max_bend = max_bend.max(j.yaw_rad.abs()).max(j.pitch_rad.abs());
        }
        checked += 1;
    }
    assert!(checked >= 50);
    // The winding path really bent the body at some of the checks.
    assert!(max_bend > 0.01, "{max_bend}");
}

/// Backing out: a command opposite the head axis moves the head back along
/// its own trail.
#[test]
fn backing_out_retraces_the_trail() {
    let mut sim = Sim::from_demo("saltpetre-drift").unwrap();
    let mut o = Oracle::new(&sim);
    let mut trail = Vec::new();
    for i in 0..4500 {
        let c = o.command(&sim);
        sim.step(&c);
        if i >= 4000 {
            trail.push(sim.true_state().head_position_m);
        }
    }
    let axis = sim.body().head_axis();
    for _ in 0..300 {
        sim.step(&MotionCommand {
            heading_map: vec3::scale(axis, -1.0),
            speed_m_per_s: 0.3,
        });
    }
    let head = sim.true_state().head_position_m;
    let nearest = trail
        .iter()
        .map(|p| vec3::dist(*p, head))
        .fold(f64::INFINITY, f64::min);
    assert!(nearest < 0.01, "{nearest}");
    // 0.9 m back along a 1.5 m stretch of trail.
    assert!(vec3::dist(head, *trail.last().unwrap()) > 0.8);
}
