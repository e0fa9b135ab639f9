//! The probe inversion against a reference library: scipy.optimize.least_squares
//! on the same forward model, and scipy.stats.chi2 quantiles.
//!
//! Data: `tests/reference/probe_cases.json`, written by the committed script
//! `tests/reference/probe_reference.py` (its header says how to regenerate
//! it; the JSON's "meta" block records the Python, numpy and scipy versions).
//! scipy was started from the true flow with tolerances of 1e-15, so its
//! answer is the weighted least-squares (maximum-likelihood) minimum; ours
//! starts from its own deterministic guess and must land on the same point.
//!
//! Tolerances (stated here, per quantity), with the solver at its default
//! settings: direction, static pressure and amplitude within 1e-4 of
//! scipy's own 1-sigma for them (far inside the noise: the default stop
//! leaves the estimate within about 1e-5 sigma of the minimum); Mach,
//! dynamic pressure and speed within 1e-4 times their relative 1-sigma;
//! chi-square within 1e-6; the 1-sigma values themselves within 1e-4
//! relative; chi-square quantiles within 1e-9 relative.

use nav_core::gas::IdealGas;
use nav_core::probe::chi2::chi_square_quantile_upper;
use nav_core::probe::{
    Direction, ProbeLayout, ProbeSolver, Regime, RegimeChoice, SolverConfig, deg,
};
use serde_json::Value;

fn data() -> Value {
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/reference/probe_cases.json");
    let text = std::fs::read_to_string(path).expect("read tests/reference/probe_cases.json");
    serde_json::from_str(&text).expect("parse probe_cases.json")
}

fn f(v: &Value, key: &str) -> f64 {
    v[key].as_f64().unwrap_or_else(|| panic!("number {key}"))
}

fn arr<const N: usize>(v: &Value, key: &str) -> [f64; N] {
    let a = v[key].as_array().unwrap_or_else(|| panic!("array {key}"));
    assert_eq!(a.len(), N, "{key} length");
    std::array::from_fn(|i| a[i].as_f64().expect("number"))
}

fn rel(a: f64, b: f64) -> f64 {
    (a - b).abs() / b.abs().max(1e-300)
}

fn check_case<const N: usize>(case: &Value, layout: ProbeLayout<N>) {
    let mut layout = layout;
    let sigma: [f64; N] = arr(case, "sigma_pa");
    let bias: [f64; N] = arr(case, "bias_pa");
    for k in 0..N {
        layout = layout
            .with_sigma(k, sigma[k])
            .unwrap()
            .with_bias(k, bias[k])
            .unwrap();
    }
    let config = SolverConfig {
        regime: RegimeChoice::Auto {
            incompressible_below_mach: 0.3,
            subsonic_up_to_mach: 0.6,
        },
        isolate_faults: false,
        ..SolverConfig::default()
    };
    let solver = ProbeSolver::new(layout, IdealGas::DRY_AIR, config).unwrap();
    let p: [f64; N] = arr(case, "pressures_pa");
    let t0 = f(case, "total_temperature_k");
    let sol = solver.solve(&p, Some(t0)).unwrap();
    let name = case["set"].as_str().unwrap();
    let want_regime = match case["regime"].as_str().unwrap() {
        "incompressible" => Regime::Incompressible,
        "compressible" => Regime::CompressibleSubsonic,
        _ => Regime::Supersonic,
    };
    assert_eq!(sol.regime, want_regime, "{name}: automatic regime");
    let s = &case["scipy"];
    let Direction::Valid { velocity_unit, .. } = sol.direction else {
        panic!("{name}: direction {:?}", sol.direction);
    };
    let v: [f64; 3] = arr(s, "velocity_unit");
    let u = [velocity_unit.x, velocity_unit.y, velocity_unit.z];
    let dot = u[0] * v[0] + u[1] * v[1] + u[2] * v[2];
    let cross = [
        u[1] * v[2] - u[2] * v[1],
        u[2] * v[0] - u[0] * v[2],
        u[0] * v[1] - u[1] * v[0],
    ];
    let ang = (cross[0] * cross[0] + cross[1] * cross[1] + cross[2] * cross[2])
        .sqrt()
        .atan2(dot);
    let tol = 1e-4;
    assert!(
        ang < tol * f(s, "sigma_angle_rad"),
        "{name}: direction differs by {ang} rad"
    );
    let dp = (sol.static_pressure_pa - f(s, "static_pressure_pa")).abs();
    assert!(
        dp < tol * f(s, "sigma_static_pressure_pa"),
        "{name}: static pressure differs by {dp} Pa"
    );
    let da = (sol.amplitude_pa - f(s, "amplitude_pa")).abs();
    let sigma_a = f(s, "sigma_amplitude_pa");
    assert!(da < tol * sigma_a, "{name}: amplitude differs by {da} Pa");
    // Derived quantities: relative 1-sigma of the amplitude bounds theirs
    // (within a factor of order one), so compare relative to it.
    let rel_sigma = sigma_a / f(s, "amplitude_pa");
    for (ours, key) in [
        (sol.dynamic_pressure_pa, "dynamic_pressure_pa"),
        (sol.mach, "mach"),
        (sol.speed_m_per_s.unwrap(), "speed_m_per_s"),
    ] {
        let r = rel(ours, f(s, key));
        assert!(
            r < tol * rel_sigma,
            "{name}: {key} differs by {r:e} relative"
        );
    }
    let dc = (sol.chi_square - f(s, "chi_square")).abs();
    assert!(dc < 1e-6, "{name}: chi-square differs by {dc}");
    let cov = sol.covariance.unwrap();
    for (ours, key) in [
        (sol.sigma.static_pressure_pa, "sigma_static_pressure_pa"),
        (cov.m44.sqrt(), "sigma_amplitude_pa"),
        (sol.sigma.angle_rad, "sigma_angle_rad"),
    ] {
        let r = rel(ours, f(s, key));
        assert!(r < 1e-4, "{name}: {key} differs by {r:e} relative");
    }
}

#[test]
fn inversion_agrees_with_scipy_least_squares() {
    let d = data();
    let cases = d["cases"].as_array().unwrap();
    assert!(cases.len() >= 50);
    let mut seen = std::collections::BTreeSet::new();
    for case in cases {
        assert!(
            case["scipy"]["status"].as_i64().unwrap() > 0,
            "scipy converged"
        );
        let cone = deg(f(case, "cone_deg"));
        match case["ports"].as_u64().unwrap() {
            5 => check_case(case, ProbeLayout::five_port(cone, 1.0).unwrap()),
            7 => check_case(case, ProbeLayout::seven_port(cone, 1.0).unwrap()),
            n => panic!("{n} ports"),
        }
        seen.insert(case["set"].as_str().unwrap().to_string());
    }
    // Every regime and both layouts were exercised.
    assert_eq!(seen.len(), 5, "{seen:?}");
}

#[test]
fn chi_square_quantiles_agree_with_scipy_stats() {
    let d = data();
    for q in d["chi2_upper_quantiles"].as_array().unwrap() {
        let dof = u32::try_from(q["dof"].as_u64().unwrap()).unwrap();
        let p = f(q, "upper_tail");
        let ours = chi_square_quantile_upper(dof, p).unwrap();
        let r = rel(ours, f(q, "x"));
        assert!(r < 1e-9, "dof {dof} p {p}: {ours} vs {} ({r:e})", f(q, "x"));
    }
}
