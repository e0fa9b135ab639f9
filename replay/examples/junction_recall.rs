//! Junction recall against the simulator's truth: for generated worlds of
//! one family, how many of the junctions the robot passed it recorded, and
//! how many records lie at no junction (false junctions, per 100 m
//! travelled).
//!
//! `cargo run --release -p replay --example junction_recall -- [family] [first_seed] [count]`
//! (defaults `fork 1 30`).
//!
//! - a true junction is a node where three or more conduits meet;
//! - passed: the head came within `PASS_M` of the node or beyond the
//!   largest radius of the conduits meeting there, whichever is larger;
//! - a record is true when its anchor lies within `MATCH_M` of a passed
//!   junction node (the anchor of a junction seen through the flow is set
//!   on the trunk before the turn, so it lies short of the node), false
//!   otherwise;
//! - the navigator keeps its last 8 junctions: a run that recorded more
//!   has its oldest ones missing from the count (the line says so).
//!
//! Prints one line per world and a total line:
//! `junction_recall family=.. worlds=.. passed=.. recorded_true=.. recall=.. false=.. metres=.. false_per_100m=..`.

use replay::run::{AnyNavigator, build_sim};
use replay::sim::MotionCommand;

const PASS_M: f64 = 0.5;
const MATCH_M: f64 = 2.0;

fn dist(a: [f64; 3], b: [f64; 3]) -> f64 {
    ((a[0] - b[0]).powi(2) + (a[1] - b[1]).powi(2) + (a[2] - b[2]).powi(2)).sqrt()
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let a: Vec<String> = std::env::args().collect();
    let family = a.get(1).cloned().unwrap_or_else(|| "fork".into());
    let first: u64 = a.get(2).and_then(|s| s.parse().ok()).unwrap_or(1);
    let count: u64 = a.get(3).and_then(|s| s.parse().ok()).unwrap_or(30);
    let (mut passed_all, mut true_all, mut false_all, mut metres_all) =
        (0usize, 0usize, 0usize, 0.0);
    for seed in first..first + count {
        let mut sim = build_sim(&format!("world:{family}"), Some(seed))?;
        let mut nav = AnyNavigator::new(sim.robot_spec(), &sim.gas_spec())?;
        let sc = sim.scenario().clone();
        // Junction nodes and the largest radius meeting at each.
        let mut nodes: Vec<([f64; 3], f64)> = Vec::new();
        for (k, n) in sc.nodes.iter().enumerate() {
            let meeting: Vec<f64> = sc
                .conduits
                .iter()
                .filter(|c| c.shape.from == k || c.shape.to == k)
                .map(|c| {
                    c.shape
                        .radius_profile
                        .iter()
                        .map(|&(_, r)| r)
                        .fold(0.0, f64::max)
                })
                .collect();
            if meeting.len() >= 3 {
                nodes.push((n.position_m, meeting.iter().copied().fold(0.0, f64::max)));
            }
        }
        let mut passed = vec![false; nodes.len()];
        let mut frame = sim.frame().clone();
        let mut last = sim.true_state().head_position_m;
        let mut metres = 0.0;
        let mut path: Vec<([f64; 3], f64)> = Vec::new();
        let outcome;
        loop {
            let cmd = nav.step(&frame)?;
            let p = sim.true_state().head_position_m;
            path.push((p, cmd.record.dynamic_pressure_pa));
            metres += dist(p, last);
            last = p;
            for (k, (q, r)) in nodes.iter().enumerate() {
                if dist(p, *q) <= r.max(PASS_M) {
                    passed[k] = true;
                }
            }
            if sim.outcome().reached_source {
                outcome = "reached";
                break;
            }
            if matches!(cmd.record.reason, nav_core::decide::ReasonCode::GaveUp) {
                outcome = "gave up";
                break;
            }
            if sim.time_s() > sc.duration_s {
                outcome = "time limit";
                break;
            }
            frame = sim
                .step(&MotionCommand {
                    heading_map: cmd.heading_map,
                    speed_m_per_s: cmd.speed_m_per_s,
                })
                .clone();
        }
        let marks = nav.snapshot().junctions;
        let mut found = vec![false; nodes.len()];
        let mut false_n = 0;
        for m in &marks {
            let hit = nodes
                .iter()
                .enumerate()
                .filter(|(k, (q, _))| passed[*k] && dist(m.position_m, *q) <= MATCH_M)
                .map(|(k, _)| k)
                .next();
            if std::env::var_os("DIP").is_some() {
                // Dynamic pressure near the anchor against farther along the
                // path: the smallest within 1.5 m over the median 2 to 4 m away.
                let near = path
                    .iter()
                    .filter(|(q, _)| dist(*q, m.position_m) <= 1.5)
                    .map(|x| x.1)
                    .fold(f64::INFINITY, f64::min);
                let mut far: Vec<f64> = path
                    .iter()
                    .filter(|(q, _)| (2.0..=4.0).contains(&dist(*q, m.position_m)))
                    .map(|x| x.1)
                    .collect();
                far.sort_by(f64::total_cmp);
                let med = far.get(far.len() / 2).copied().unwrap_or(f64::NAN);
                println!(
                    "  dip {} ratio={:.3}",
                    if hit.is_some() { "true" } else { "false" },
                    near / med
                );
            }
            match hit {
                Some(k) => found[k] = true,
                None => false_n += 1,
            }
        }
        let passed_n = passed.iter().filter(|&&x| x).count();
        let true_n = found.iter().filter(|&&x| x).count();
        println!(
            "{family}-{seed}: {outcome}, passed {passed_n}, recorded {true_n} of them, {false_n} false, {metres:.1} m{}",
            if marks.len() >= 8 {
                " (junction table full)"
            } else {
                ""
            }
        );
        passed_all += passed_n;
        true_all += true_n;
        false_all += false_n;
        metres_all += metres;
    }
    let recall = if passed_all > 0 {
        true_all as f64 / passed_all as f64
    } else {
        f64::NAN
    };
    println!(
        "junction_recall family={family} worlds={count} passed={passed_all} recorded_true={true_all} recall={recall:.3} false={false_all} metres={metres_all:.1} false_per_100m={:.2}",
        100.0 * false_all as f64 / metres_all.max(1e-9)
    );
    Ok(())
}
