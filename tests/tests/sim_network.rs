//! The network solver: hand-checkable networks, mass balance everywhere,
//! a large generated network, typed failures.

use replay::sim::friction;
use replay::sim::network::{
    FlowError, FlowProblem, FlowSolution, LinearSolver, Link, LinkModel, LossPiece,
    MASS_BALANCE_TOLERANCE, NodeCondition,
};
use replay::sim::nozzle::Nozzle;
use replay::sim::{demos, world::World};

fn pipe(from: usize, to: usize, l: f64, d: f64, eps: f64) -> Link {
    Link {
        from,
        to,
        model: LinkModel::Incompressible {
            pieces: vec![LossPiece {
                length_m: l,
                diameter_m: d,
            }],
            roughness_m: eps,
        },
    }
}

fn problem(nodes: Vec<NodeCondition>, links: Vec<Link>, solver: LinearSolver) -> FlowProblem {
    FlowProblem {
        nodes,
        links,
        density_kg_per_m3: 1.2,
        viscosity_pa_s: 1.8e-5,
        max_iterations: 100,
        solver,
    }
}

/// Mass balance recomputed here from the link flows, relative to each
/// node's throughput (a stagnant node: to the largest flow).
fn check_balance(prob: &FlowProblem, s: &FlowSolution) {
    let n = prob.nodes.len();
    let mut resid = vec![0.0; n];
    let mut through = vec![0.0; n];
    let mut qmax: f64 = 0.0;
    for (l, ls) in prob.links.iter().zip(&s.links) {
        let q = ls.mass_flow_kg_per_s;
        resid[l.from] -= q;
        resid[l.to] += q;
        through[l.from] += q.abs();
        through[l.to] += q.abs();
        qmax = qmax.max(q.abs());
    }
    for (i, c) in prob.nodes.iter().enumerate() {
        if let NodeCondition::Free { injection_kg_per_s } = c {
            let r = resid[i] + injection_kg_per_s;
            let half = 0.5 * (through[i] + injection_kg_per_s.abs());
            let scale = if half < 1e-3 * qmax { qmax } else { half };
            assert!(
                r.abs() <= MASS_BALANCE_TOLERANCE * scale,
                "node {i}: residual {r} of {scale}"
            );
        }
    }
}

/// Two laminar pipes in parallel between a junction fed with a mass flow
/// and an exit. Hagen–Poiseuille gives each pipe's flow proportional to
/// D^4 / L at the same pressure drop, so by hand:
/// pipe A: D = 20 mm, L = 10 m  -> D^4/L = 1.6e-8
/// pipe B: D = 10 mm, L = 2.5 m -> D^4/L = 4.0e-9
/// split A : B = 4 : 1, i.e. 80 % and 20 % of the feed.
#[test]
fn parallel_laminar_split_by_hand() {
    let feed = 1e-5; // kg/s, Re well below 2300
    let prob = problem(
        vec![
            NodeCondition::Free {
                injection_kg_per_s: feed,
            },
            NodeCondition::Fixed {
                pressure_pa: 101_325.0,
            },
        ],
        vec![pipe(0, 1, 10.0, 0.02, 0.0), pipe(0, 1, 2.5, 0.01, 0.0)],
        LinearSolver::Dense,
    );
    let s = prob.solve().unwrap();
    let qa = s.links[0].mass_flow_kg_per_s;
    let qb = s.links[1].mass_flow_kg_per_s;
    assert!((qa - 0.8 * feed).abs() < 1e-12 * feed, "{qa}");
    assert!((qb - 0.2 * feed).abs() < 1e-12 * feed, "{qb}");
    check_balance(&prob, &s);
}

/// Independent Colebrook solve by plain fixed-point iteration (Colebrook
/// 1939 equation as written), for the check below.
fn colebrook_fixed_point(re: f64, ed: f64) -> f64 {
    let mut x: f64 = 8.0;
    for _ in 0..200 {
        x = -2.0 * (ed / 3.7 + 2.51 * x / re).log10();
    }
    1.0 / (x * x)
}

/// Two rough turbulent pipes in parallel between fixed pressures 2 kPa
/// apart. By hand, in the fully rough limit f is the same for both (same
/// D and eps/D = 0.01), so dp = f (L/D) rho V^2 / 2 gives
/// V_A / V_B = sqrt(L_B / L_A) = sqrt(400/100) = 2. Colebrook's small Re
/// dependence moves this by well under 1 %. Exactly: each pipe's drop
/// equals Darcy–Weisbach with the Colebrook f at its own Re.
#[test]
fn parallel_turbulent_pipes_by_hand() {
    let (d, eps) = (0.3, 0.003);
    let prob = problem(
        vec![
            NodeCondition::Fixed {
                pressure_pa: 103_325.0,
            },
            NodeCondition::Fixed {
                pressure_pa: 101_325.0,
            },
        ],
        vec![pipe(0, 1, 100.0, d, eps), pipe(0, 1, 400.0, d, eps)],
        LinearSolver::Dense,
    );
    let s = prob.solve().unwrap();
    let (qa, qb) = (s.links[0].mass_flow_kg_per_s, s.links[1].mass_flow_kg_per_s);
    assert!((qa / qb - 2.0).abs() < 0.01, "ratio {}", qa / qb);
    let a = core::f64::consts::PI * d * d / 4.0;
    for (q, l) in [(qa, 100.0), (qb, 400.0)] {
        let v = q / (1.2 * a);
        let re = 1.2 * v * d / 1.8e-5;
        let f = colebrook_fixed_point(re, eps / d);
        let dp = f * l / d * 1.2 * v * v / 2.0;
        assert!((dp - 2000.0).abs() < 1e-8 * 2000.0, "dp {dp}");
    }
}

/// Every demo network balances mass at every junction to relative 1e-9,
/// recomputed here from the solved link flows.
#[test]
fn demos_balance_mass_everywhere() {
    for (key, _) in demos::DEMOS {
        let sc = demos::demo(key).unwrap().unwrap();
        let w = World::new(&sc).unwrap();
        check_balance(&w.problem, &w.solution);
        assert!(w.solution.iterations >= 2 && w.solution.iterations < 100);
    }
}

/// A generated ladder network: both linear solvers give the same
/// pressures (200 links, so the dense solve stays quick in a debug build),
/// and the conjugate-gradient path balances mass on 1000 links.
#[test]
fn generated_networks_agree_between_solvers() {
    let (nodes, links) = ladder(67, 200);
    let dense = problem(nodes.clone(), links.clone(), LinearSolver::Dense)
        .solve()
        .unwrap();
    let cg = problem(nodes, links, LinearSolver::ConjugateGradient)
        .solve()
        .unwrap();
    let span = 50.0;
    for (a, b) in dense.node_pressure_pa.iter().zip(&cg.node_pressure_pa) {
        assert!((a - b).abs() < 1e-7 * span, "{a} vs {b}");
    }
    let (nodes, links) = ladder(334, 1000);
    assert_eq!(links.len(), 1000);
    let big = problem(nodes, links, LinearSolver::ConjugateGradient);
    let s = big.solve().unwrap();
    check_balance(&big, &s);
}

/// Ladder: two rails of `n` nodes joined by rungs; a source at one end, an
/// exit at the other, diameters varied deterministically.
fn ladder(n: usize, total: usize) -> (Vec<NodeCondition>, Vec<Link>) {
    let mut nodes = vec![
        NodeCondition::Free {
            injection_kg_per_s: 0.0
        };
        2 * n
    ];
    nodes[0] = NodeCondition::Fixed {
        pressure_pa: 101_375.0,
    };
    nodes[2 * n - 1] = NodeCondition::Fixed {
        pressure_pa: 101_325.0,
    };
    let mut links = Vec::new();
    let dia = |k: usize| 0.2 + 0.15 * (((k * 7919) % 97) as f64 / 97.0);
    for i in 0..n - 1 {
        links.push(pipe(i, i + 1, 3.0, dia(links.len()), 0.01));
        links.push(pipe(n + i, n + i + 1, 3.0, dia(links.len()), 0.01));
    }
    for i in (0..n).step_by(2) {
        links.push(pipe(i, n + i, 2.0, dia(links.len()), 0.01));
    }
    // Pad to `total` links with extra rungs.
    let mut i = 1;
    while links.len() < total && i < n {
        links.push(pipe(i, n + i, 2.0, dia(links.len()), 0.01));
        i += 2;
    }
    links.truncate(total);
    (nodes, links)
}

#[test]
fn failures_are_typed() {
    // A junction with no path to a fixed node: singular.
    let prob = problem(
        vec![
            NodeCondition::Fixed {
                pressure_pa: 101_325.0,
            },
            NodeCondition::Free {
                injection_kg_per_s: 0.0,
            },
            NodeCondition::Free {
                injection_kg_per_s: 0.1,
            },
            NodeCondition::Free {
                injection_kg_per_s: 0.0,
            },
        ],
        vec![pipe(0, 1, 1.0, 0.1, 0.0), pipe(2, 3, 1.0, 0.1, 0.0)],
        LinearSolver::Dense,
    );
    assert_eq!(prob.solve().unwrap_err(), FlowError::Singular);
    // Iteration cap.
    let mut prob = problem(
        vec![
            NodeCondition::Fixed {
                pressure_pa: 102_325.0,
            },
            NodeCondition::Free {
                injection_kg_per_s: 0.0,
            },
            NodeCondition::Fixed {
                pressure_pa: 101_325.0,
            },
        ],
        vec![pipe(0, 1, 10.0, 0.3, 0.003), pipe(1, 2, 10.0, 0.2, 0.003)],
        LinearSolver::Dense,
    );
    prob.max_iterations = 1;
    assert!(matches!(
        prob.solve(),
        Err(FlowError::NoConvergence { iterations: 1, .. })
    ));
    // A compressible link must start at a fixed-pressure reservoir.
    let nz = Nozzle::new(
        vec![0.0, 1.0],
        vec![1.0, 2.0],
        nav_core::gas::IdealGas::DRY_AIR,
        300.0,
    )
    .unwrap();
    let prob = problem(
        vec![
            NodeCondition::Free {
                injection_kg_per_s: 1.0,
            },
            NodeCondition::Fixed {
                pressure_pa: 101_325.0,
            },
        ],
        vec![Link {
            from: 0,
            to: 1,
            model: LinkModel::Compressible(nz),
        }],
        LinearSolver::Dense,
    );
    assert_eq!(
        prob.solve().unwrap_err(),
        FlowError::CompressibleNotFromReservoir { link: 0 }
    );
    assert!(friction::colebrook(-1.0, 0.0).is_err());
}
