//! One 7-port inversion (40 deg cone, 1 % noise, flow 30 deg off axis).
//! Run: `cargo bench -p nav-core --bench probe`.

use criterion::{Criterion, criterion_group, criterion_main};
use std::hint::black_box;

use nav_core::gas::IdealGas;
use nav_core::probe::{FlowCondition, ProbeLayout, ProbeSolver, Regime, SolverConfig, deg};

fn bench(c: &mut Criterion) {
    let layout = ProbeLayout::seven_port(deg(40.0), 5.0).unwrap();
    let solver = ProbeSolver::new(layout, IdealGas::DRY_AIR, SolverConfig::default()).unwrap();
    let a = deg(30.0);
    let b = deg(20.0);
    let v = [
        -libm::cos(a),
        -libm::sin(a) * libm::cos(b),
        -libm::sin(a) * libm::sin(b),
    ];
    let flow =
        FlowCondition::from_dynamic_pressure(&IdealGas::DRY_AIR, v, 101_325.0, 500.0).unwrap();
    let mut p = solver
        .model()
        .port_pressures(Regime::Incompressible, &flow)
        .unwrap();
    // Fixed, noise-like offsets of about 1 % of q (5 Pa).
    let offsets = [3.1, -4.7, 6.2, -1.9, 0.8, -5.5, 2.4];
    for (x, o) in p.iter_mut().zip(offsets) {
        *x += o;
    }
    c.bench_function("probe_solve_7port", |bch| {
        bch.iter(|| solver.solve(black_box(&p), Some(293.15)))
    });
    println!(
        "size_of ProbeSolver<7> = {} B, FlowSolution = {} B, fit state = {} B",
        core::mem::size_of::<ProbeSolver<7>>(),
        core::mem::size_of::<nav_core::probe::FlowSolution>(),
        ProbeSolver::<7>::fit_state_bytes()
    );
}

criterion_group!(benches, bench);
criterion_main!(benches);
