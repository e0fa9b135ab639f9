//! Network solver figures: a generated grid network of 1000 conduits
//! (25 x 20 junction grid, 955 drifts, plus 45 blind spurs; a reservoir in
//! one corner, exits in two others), diameters and roughness varied
//! deterministically. Solved with each linear solver; prints time,
//! Newton iterations and the worst mass imbalance.
//!
//! `cargo run --release -p replay --example network_solve`
//!
//! Last line: `network_solve links=<n> nodes=<m> iterations=<k> solve_ms=<t> solver=<s> max_imbalance=<r>`.

use replay::sim::network::{FlowProblem, LinearSolver, Link, LinkModel, LossPiece, NodeCondition};

fn build() -> FlowProblem {
    let (nx, ny) = (25usize, 20usize);
    let id = |i: usize, j: usize| j * nx + i;
    let mut nodes = vec![
        NodeCondition::Free {
            injection_kg_per_s: 0.0
        };
        nx * ny
    ];
    nodes[id(0, 0)] = NodeCondition::Fixed {
        pressure_pa: 101_425.0,
    };
    nodes[id(nx - 1, ny - 1)] = NodeCondition::Fixed {
        pressure_pa: 101_325.0,
    };
    nodes[id(nx - 1, 0)] = NodeCondition::Fixed {
        pressure_pa: 101_330.0,
    };
    let mut links = Vec::new();
    let mut k = 0usize;
    let mut pipe = |a: usize, b: usize, len: f64, links: &mut Vec<Link>| {
        k += 1;
        let d = 0.6 + 0.8 * (((k * 7919) % 101) as f64 / 101.0);
        let eps = 0.01 + 0.04 * (((k * 104_729) % 53) as f64 / 53.0);
        links.push(Link {
            from: a,
            to: b,
            model: LinkModel::Incompressible {
                pieces: vec![LossPiece {
                    length_m: len,
                    diameter_m: d,
                }],
                roughness_m: eps,
            },
        });
    };
    for j in 0..ny {
        for i in 0..nx - 1 {
            pipe(id(i, j), id(i + 1, j), 8.0, &mut links);
        }
    }
    for j in 0..ny - 1 {
        for i in 0..nx {
            pipe(id(i, j), id(i, j + 1), 6.0, &mut links);
        }
    }
    // Blind spurs: new dead-end nodes.
    let mut s = 0;
    while links.len() < 1000 {
        let at = (s * 37 + 11) % (nx * ny);
        nodes.push(NodeCondition::Free {
            injection_kg_per_s: 0.0,
        });
        let n = nodes.len() - 1;
        pipe(at, n, 4.0, &mut links);
        s += 1;
    }
    FlowProblem {
        nodes,
        links,
        density_kg_per_m3: 1.2,
        viscosity_pa_s: 1.8e-5,
        max_iterations: 100,
        solver: LinearSolver::Auto,
    }
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let base = build();
    let mut last = String::new();
    for solver in [LinearSolver::Dense, LinearSolver::ConjugateGradient] {
        let prob = FlowProblem {
            solver,
            ..base.clone()
        };
        // Median of 5 solves.
        let mut times = Vec::new();
        let mut sol = None;
        for _ in 0..5 {
            let t = std::time::Instant::now();
            let s = prob.solve()?;
            times.push(t.elapsed().as_secs_f64() * 1e3);
            sol = Some(s);
        }
        times.sort_by(f64::total_cmp);
        let s = sol.ok_or("no solve")?;
        let qmax = s
            .links
            .iter()
            .map(|l| l.mass_flow_kg_per_s.abs())
            .fold(0.0, f64::max);
        println!(
            "{solver:?}: {} links, {} nodes, {} Newton iterations, median {:.2} ms (min {:.2}), worst relative imbalance {:.2e}, largest flow {:.3} kg/s",
            prob.links.len(),
            prob.nodes.len(),
            s.iterations,
            times[2],
            times[0],
            s.max_relative_imbalance,
            qmax
        );
        last = format!(
            "network_solve links={} nodes={} iterations={} solve_ms={:.2} solver={solver:?} max_imbalance={:.2e}",
            prob.links.len(),
            prob.nodes.len(),
            s.iterations,
            times[2],
            s.max_relative_imbalance
        );
    }
    println!("{last}");
    Ok(())
}
