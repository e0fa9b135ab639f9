//! Sensor models: the probe truth law, misalignment, latency, noise,
//! port faults, contacts, odometry drift, dropouts, determinism.

use replay::record::FrameRecord;
use replay::sim::{MotionCommand, Sim};

/// A straight 10 m drift along x, radius 0.4 m, air flowing from the
/// source at x = 10 to the exit at x = 0; the head starts at x = 2 facing
/// upstream (+x). Sensors are ideal unless `extra` says otherwise.
fn tube(extra: &str) -> Sim {
    let src = format!(
        r#"[scenario]
name = "sensor tube"
seed = 77

[gas]
species = "air"
temperature_k = 290.0

[[node]]
id = "out"
position_m = [0.0, 0.0, 0.0]
kind = "exit"
ambient_pressure_pa = 101325.0

[[node]]
id = "in"
position_m = [10.0, 0.0, 0.0]
kind = "source"
stagnation_pressure_pa = 101345.0

[[conduit]]
id = "drift"
from = "out"
to = "in"
radius_m = 0.4
roughness_m = 0.01

[robot]
speed_limit_m_per_s = 0.4
module_count = 3
module_length_m = 0.2
module_radius_m = 0.05

[[robot.ring]]
axial_m = 0.1
count = 8

[robot.probe]
layout = "five_port"
cone_angle_deg = 45.0
head_radius_m = 0.03

[start]
position_m = [2.0, 0.0, 0.0]

{extra}
"#
    );
    Sim::from_toml_str(&src).unwrap()
}

const IDEAL: &str = r#"
[sensors.probe]
noise_pa = 0.0
[sensors.odometry]
position_walk_m_per_sqrt_m = 0.0
attitude_walk_rad_per_sqrt_m = 0.0
[sensors.joints]
noise_rad = 0.0
[sensors.contact]
noise_n = 0.0
normal_noise_rad = 0.0
"#;

fn ports(f: &FrameRecord) -> Vec<f64> {
    f.port_pressures_pa.clone().unwrap()
}

fn forward(speed: f64) -> MotionCommand {
    MotionCommand {
        heading_map: [1.0, 0.0, 0.0],
        speed_m_per_s: speed,
    }
}

/// Isentropic `p0 - p` for the relative speed `u` (NACA 1135 eq. 44, with
/// the speed of sound from `gamma p / rho`); at these Mach numbers (about
/// 0.03) it exceeds `rho u^2 / 2` by `M^2 / 4`, under 0.03 %.
fn dp0(p: f64, rho: f64, u: f64) -> f64 {
    let g = 1.4;
    let m2 = u * u * rho / (g * p);
    let dp = p * ((1.0 + 0.2 * m2).powf(3.5) - 1.0);
    let q = 0.5 * rho * u * u;
    assert!((dp / q - 1.0).abs() < 3e-4);
    dp
}

/// Sphere potential flow (Anderson, *Fundamentals of Aerodynamics*, flow
/// over a sphere): head-on, the tip (theta = 0) reads p + dp0 and the
/// 45 deg cone ports read p + dp0 (1 - 9/4 sin^2 45) = p - dp0/8. Computed
/// here from the true local flow, not from the simulator's probe code.
#[test]
fn ideal_probe_follows_the_sphere_law() {
    let sim = tube(IDEAL);
    let st = sim.true_state();
    let v = st.flow.velocity_m_per_s;
    assert!(
        v[0] < -0.5 && v[1].abs() < 1e-12 && v[2].abs() < 1e-12,
        "{v:?}"
    );
    let p = st.flow.static_pressure_pa;
    let q = dp0(p, st.flow.density_kg_per_m3, v[0].abs());
    let f = ports(sim.frame());
    assert!(
        (f[0] - (p + q)).abs() < 1e-9 * q,
        "tip {} vs {}",
        f[0],
        p + q
    );
    for side in &f[1..] {
        assert!((side - (p - q / 8.0)).abs() < 1e-9 * q);
    }
    // Moving upstream at 0.4 m/s adds to the relative flow: |v| + 0.4.
    let mut sim = tube(IDEAL);
    for _ in 0..20 {
        sim.step(&forward(0.4));
    }
    let st = sim.true_state();
    assert!((st.head_velocity_m_per_s[0] - 0.4).abs() < 1e-9);
    let u = st.flow.velocity_m_per_s[0].abs() + 0.4;
    let p = st.flow.static_pressure_pa;
    let q = dp0(p, st.flow.density_kg_per_m3, u);
    let f = ports(sim.frame());
    assert!((f[0] - p - q).abs() < 1e-9 * q);
}

/// A probe yawed +5 deg (toward +y) against the head sees the flow at 50 deg
/// on the +y port and 40 deg on the -y port: the -y port reads higher.
#[test]
fn misalignment_shifts_the_side_ports() {
    let sim = tube(&IDEAL.replace(
        "[sensors.probe]\nnoise_pa = 0.0\n",
        "[sensors.probe]\nnoise_pa = 0.0\nmisalignment_deg = [5.0, 0.0, 0.0]\n",
    ));
    let st = sim.true_state();
    let p = st.flow.static_pressure_pa;
    let q = dp0(
        p,
        st.flow.density_kg_per_m3,
        st.flow.velocity_m_per_s[0].abs(),
    );
    let f = ports(sim.frame());
    let cp = |deg: f64| 1.0 - 2.25 * deg.to_radians().sin().powi(2);
    assert!((f[1] - (p + q * cp(50.0))).abs() < 1e-9 * q, "+y port");
    assert!((f[3] - (p + q * cp(40.0))).abs() < 1e-9 * q, "-y port");
    assert!(f[3] > f[1]);
}

/// Per-port noise and bias: white noise of the configured sigma about truth
/// plus the fixed bias.
#[test]
fn noise_and_bias_statistics() {
    let mut sim = tube(&IDEAL.replace(
        "noise_pa = 0.0",
        "noise_pa = 2.0\nbias_pa = [1.0, -1.0, 0.5, 0.0, 3.0]",
    ));
    let truth = sim.sensors().truth_ports().to_vec();
    let n = 4000;
    let mut s = [0.0; 5];
    let mut s2 = [0.0; 5];
    for _ in 0..n {
        let f = ports(sim.step(&MotionCommand::hold()));
        for i in 0..5 {
            let e = f[i] - truth[i];
            s[i] += e;
            s2[i] += e * e;
        }
    }
    let bias = [1.0, -1.0, 0.5, 0.0, 3.0];
    for i in 0..5 {
        let mean = s[i] / f64::from(n);
        let sd = (s2[i] / f64::from(n) - mean * mean).sqrt();
        // Standard error of the mean 2/sqrt(4000) = 0.032 Pa; of sigma about 1.1 %.
        assert!((mean - bias[i]).abs() < 0.15, "port {i} mean {mean}");
        assert!((sd - 2.0).abs() < 0.1, "port {i} sd {sd}");
    }
}

/// A leak starting at t = 1 s reaches the output exactly `latency` later,
/// moving the tip reading `fraction` of the way toward static.
#[test]
fn latency_delays_a_leak_by_whole_steps() {
    let extra = format!(
        "{}\n[[fault]]\nkind = \"port_leak\"\nat_s = 1.0\nport = 0\nleak_fraction = 0.25\n",
        IDEAL.replace("noise_pa = 0.0", "noise_pa = 0.0\nlatency_s = 0.05")
    );
    let mut sim = tube(&extra);
    let p = sim.true_state().flow.static_pressure_pa;
    let mut tip = Vec::new();
    for _ in 0..110 {
        let f = sim.step(&MotionCommand::hold());
        tip.push((f.time_s, ports(f)[0]));
    }
    let before = tip[0].1;
    let leaked = before + 0.25 * (p - before);
    for (t, v) in &tip {
        if *t < 1.05 - 1e-9 {
            assert!((v - before).abs() < 1e-9, "t {t}: {v}");
        } else {
            assert!((v - leaked).abs() < 1e-6, "t {t}: {v} vs {leaked}");
        }
    }
}

/// Blocked: the port keeps the pressure it had at onset while the others
/// follow the flow; stuck: the output freezes, noise included, and moves
/// again after the fault ends.
#[test]
fn blocked_and_stuck_ports() {
    let extra = format!(
        "{}\n[[fault]]\nkind = \"port_blocked\"\nat_s = 0.5\nport = 0\n\n[[fault]]\nkind = \"port_stuck\"\nat_s = 0.5\nuntil_s = 1.0\nport = 2\n",
        IDEAL.replace("noise_pa = 0.0", "noise_pa = 0.5")
    );
    let mut sim = tube(&extra);
    let mut control = tube(&IDEAL.replace("noise_pa = 0.0", "noise_pa = 0.5"));
    let mut at_onset = None;
    let mut stuck = None;
    for i in 0..150 {
        // Hold until 0.5 s, then drive upstream (the ram effect raises the tip).
        let cmd = if i < 50 {
            MotionCommand::hold()
        } else {
            forward(0.4)
        };
        let f = ports(sim.step(&cmd));
        let c = ports(control.step(&cmd));
        let t = sim.time_s();
        if (t - 0.5).abs() < 1e-9 {
            at_onset = Some(c[0]);
            stuck = Some(f[2]);
        }
        if t > 0.9 && t < 1.0 {
            let hold = at_onset.unwrap();
            assert!(
                (f[0] - hold).abs() < 3.0,
                "blocked port moved: {} vs {hold}",
                f[0]
            );
            // The ram effect of 0.4 m/s into a 10 m/s stream lifts the
            // unblocked tip by about rho u dv = 1.2 * 10 * 0.4 = 5 Pa.
            assert!(c[0] > hold + 3.0, "control tip should rise");
            assert_eq!(f[2], stuck.unwrap());
        }
        if t > 1.05 {
            assert_ne!(f[2], stuck.unwrap());
        }
    }
}

/// Sliding along the +y wall: the head is stopped at the wall (a wall
/// strike), the modules' wall-side skin sensors report force = stiffness x
/// penetration (penetration about the skin compliance), with the wall's
/// normal, and the dead sensor (module 0, sensor 0, the one facing +y)
/// stays silent.
#[test]
fn contacts_from_wall_penetration_and_dead_sensor() {
    let extra = format!(
        "{IDEAL}\n[[fault]]\nkind = \"contact_dead\"\nat_s = 0.0\nmodule = 0\nsensor = 0\n"
    );
    let mut sim = tube(&extra);
    let mut seen = std::collections::BTreeSet::new();
    let spec = sim.robot_spec().clone();
    let k = sim.scenario().sensors.contact.stiffness_n_per_m;
    let compliance = sim.scenario().motion.skin_compliance_m;
    for _ in 0..700 {
        let f = sim.step(&MotionCommand {
            heading_map: [1.0, 0.2, 0.0],
            speed_m_per_s: 0.4,
        });
        for c in &f.contacts {
            seen.insert((c.module, c.sensor));
            assert!(!(c.module == 0 && c.sensor == 0), "dead sensor reported");
            assert!(
                c.force_n > 0.0 && c.force_n <= k * (compliance + 0.002),
                "{c:?}"
            );
            // The wall is on the +y side: the normal (skin toward wall)
            // points along the sensor's own outward normal.
            let s = spec.modules[c.module as usize].sensors[c.sensor as usize];
            let psi = s.angle_deg.to_radians();
            let n = c.normal_module.unwrap();
            assert!(n[1] * psi.cos() + n[2] * psi.sin() > 0.9, "{c:?}");
        }
    }
    let o = sim.outcome();
    assert!(o.wall_strikes >= 1 && o.wall_contact_steps > 10, "{o:?}");
    assert!(seen.contains(&(1, 0)) && seen.contains(&(2, 0)), "{seen:?}");
    // The head's skin never went past the wall by more than the compliance.
    let head = sim.true_state().head_position_m;
    assert!(head[1] + 0.05 <= 0.4 + compliance + 1e-6, "{head:?}");
}

/// Odometry: exact with zero noise; with noise its error grows with
/// distance and the reported sigma grows with it; a scheduled drift adds
/// rate x time.
#[test]
fn odometry_drift() {
    let mut ideal = tube(IDEAL);
    for _ in 0..500 {
        ideal.step(&forward(0.4));
    }
    let p = ideal.frame().pose.unwrap();
    assert_eq!(p.position_m, ideal.true_state().head_position_m);
    let mut noisy = tube(&IDEAL.replace(
        "position_walk_m_per_sqrt_m = 0.0\nattitude_walk_rad_per_sqrt_m = 0.0",
        "position_walk_m_per_sqrt_m = 0.01\nattitude_walk_rad_per_sqrt_m = 0.01\nscale_error = 0.02",
    ));
    let s0 = noisy.frame().pose.unwrap().position_sigma_m;
    for _ in 0..500 {
        noisy.step(&forward(0.4));
    }
    let p = noisy.frame().pose.unwrap();
    let err = replay::sim::vec3::dist(p.position_m, noisy.true_state().head_position_m);
    // 2 m travelled with a 2 % scale error alone is 0.04 m.
    assert!(err > 0.02, "error {err}");
    assert!(p.position_sigma_m > s0 && p.attitude_sigma_rad > 0.0);
    let mut drift = tube(&format!(
        "{IDEAL}\n[[fault]]\nkind = \"odometry_drift\"\nat_s = 0.0\ndrift_m_per_s = [0.0, 0.01, 0.0]\n"
    ));
    for _ in 0..300 {
        drift.step(&MotionCommand::hold());
    }
    let e = drift.sensors().odometry_error_m();
    assert!((e[1] - 0.03).abs() < 1e-9, "{e:?}");
}

#[test]
fn scheduled_dropouts() {
    let mut sim = tube(&format!(
        "{IDEAL}\n[[fault]]\nkind = \"dropout\"\nchannel = \"pose\"\nat_s = 0.2\nuntil_s = 0.3\n\n[[fault]]\nkind = \"dropout\"\nchannel = \"all\"\nat_s = 0.5\nuntil_s = 0.6\n"
    ));
    for _ in 0..80 {
        let f = sim.step(&MotionCommand::hold()).clone();
        let t = f.time_s;
        let pose_out = (0.2..0.3 - 1e-9).contains(&t) || (0.5..0.6 - 1e-9).contains(&t);
        assert_eq!(f.pose.is_none(), pose_out, "t {t}");
        let all_out = (0.5..0.6 - 1e-9).contains(&t);
        assert_eq!(f.port_pressures_pa.is_none(), all_out, "t {t}");
        assert_eq!(f.joints.is_none(), all_out, "t {t}");
        assert_eq!(f.total_temperature_k.is_none(), all_out, "t {t}");
    }
}

fn run(sim: &mut Sim, n: usize) -> Vec<FrameRecord> {
    let mut o = replay::sim::Oracle::new(sim);
    (0..n)
        .map(|_| {
            let c = o.command(sim);
            sim.step(&c).clone()
        })
        .collect()
}

/// Same seed, same frames bit for bit, also when two runs go on in
/// parallel threads; another seed gives other noise.
#[test]
fn deterministic_for_a_seed_and_thread_count() {
    let a = run(&mut Sim::from_demo("wrens-slot").unwrap(), 1500);
    let handles: Vec<_> = (0..2)
        .map(|_| std::thread::spawn(|| run(&mut Sim::from_demo("wrens-slot").unwrap(), 1500)))
        .collect();
    for h in handles {
        let b = h.join().unwrap();
        assert!(a == b, "parallel run differs");
    }
    let text = replay::sim::demos::demo_text("wrens-slot")
        .unwrap()
        .replace("seed = 3303", "seed = 3304");
    let c = run(&mut Sim::from_toml_str(&text).unwrap(), 1500);
    assert!(a != c);
    // Same motion (the oracle uses the truth), different noise.
    assert_eq!(a.last().unwrap().time_s, c.last().unwrap().time_s);
}
