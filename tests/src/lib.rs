//! Shared workloads for the cross-crate tests.
//!
//! [`core_workload_digest`] runs a fixed, deterministic computation through
//! `nav-core` and returns its FNV-1a digest. The determinism test runs it in
//! this process and, through the `determinism-witness` binary, in a separate
//! one, and compares both with the constants committed in
//! `tests/determinism.rs`. Every new core entry point should be fed here.

use nav_core::digest::Fnv64;
use nav_core::gas::IdealGas;

/// Transcendental functions straight from `libm`, over a fixed grid that
/// includes awkward arguments (large, tiny, near multiples of pi).
pub fn libm_digest() -> u64 {
    let mut d = Fnv64::new();
    for i in 0..2000u32 {
        let x = f64::from(i) * 0.0137 - 7.3;
        d.f64(libm::sin(x * 113.0));
        d.f64(libm::cos(x * 1e3));
        d.f64(libm::tan(x));
        d.f64(libm::exp(x));
        d.f64(libm::log(libm::fabs(x) + 1e-300));
        d.f64(libm::pow(libm::fabs(x), 1.0 / 3.5));
        d.f64(libm::atan2(x, 1.0 - x));
        d.f64(libm::asin(libm::sin(x)));
        d.f64(libm::sqrt(libm::fabs(x)));
        d.f64(libm::cbrt(x));
        d.f64(libm::hypot(x, 0.3));
    }
    d.finish()
}

/// The core's own numerics: gas relations and their root-finding inverses.
pub fn core_workload_digest() -> u64 {
    let mut d = Fnv64::new();
    let gases = [
        IdealGas::DRY_AIR,
        IdealGas::WATER_VAPOUR,
        IdealGas::new(1.33, 461.5).unwrap_or(IdealGas::DRY_AIR),
    ];
    for g in gases {
        for i in 1..400u32 {
            let m = f64::from(i) * 0.0125;
            let mut put = |r: Result<f64, nav_core::gas::GasError>| match r {
                Ok(v) => d.f64(v),
                Err(_) => d.u64(u64::MAX),
            };
            put(g.p0_over_p(m));
            put(g.rho0_over_rho(m));
            put(g.area_ratio(m));
            put(g.rayleigh_pitot_p02_over_p1(m));
            put(g.normal_shock_p02_over_p01(m));
            if let Ok(a) = g.area_ratio(m) {
                put(g.mach_from_area_ratio_subsonic(a));
                put(g.mach_from_area_ratio_supersonic(a));
            }
            if let Ok(p) = g.p0_over_p(m) {
                put(g.mach_from_pitot_over_static(p));
            }
        }
    }
    probe_workload(&mut d);
    d.finish()
}

/// Probe inversions: both presets, every regime, a leaking port, a
/// fixed pseudo-noise pattern (no RNG: offsets from `libm::sin`).
pub fn probe_workload(d: &mut Fnv64) {
    use nav_core::probe::{
        Direction, FaultReport, FlowCondition, ProbeLayout, ProbeSolver, Regime, SolverConfig, deg,
    };
    let gas = IdealGas::DRY_AIR;
    let (Ok(seven), Ok(five)) = (
        ProbeLayout::seven_port(deg(40.0), 5.0),
        ProbeLayout::five_port(deg(45.0), 5.0),
    ) else {
        d.u64(u64::MAX);
        return;
    };
    let (Ok(s7), Ok(s5)) = (
        ProbeSolver::new(seven, gas, SolverConfig::default()),
        ProbeSolver::new(five, gas, SolverConfig::default()),
    ) else {
        d.u64(u64::MAX);
        return;
    };
    let put = |d: &mut Fnv64, r: Result<nav_core::probe::FlowSolution, _>| match r {
        Ok(sol) => {
            if let Direction::Valid { velocity_unit, .. } = sol.direction {
                d.f64s(velocity_unit.as_slice());
            } else {
                d.u64(1);
            }
            d.f64(sol.static_pressure_pa);
            d.f64(sol.dynamic_pressure_pa);
            d.f64(sol.mach);
            d.f64(sol.sigma.angle_rad);
            d.f64(sol.chi_square);
            d.u64(u64::from(sol.convergence.iterations()));
            d.u64(match sol.fault {
                FaultReport::NotTestable => 10,
                FaultReport::Consistent { .. } => 11,
                FaultReport::Isolated { port, .. } => 100 + port as u64,
                FaultReport::DetectedNotIsolated { .. } => 12,
            });
            if let Some(v) = sol.speed_m_per_s {
                d.f64(v);
            }
        }
        Err(_) => d.u64(u64::MAX - 1),
    };
    for i in 0..24u32 {
        let k = f64::from(i);
        let theta = deg(2.5 * k);
        let phi = deg(37.0 * k);
        let v = [
            -libm::cos(theta),
            -libm::sin(theta) * libm::cos(phi),
            -libm::sin(theta) * libm::sin(phi),
        ];
        let (regime, mach, ps) = match i % 3 {
            0 => (Regime::Incompressible, 0.08, 101_325.0),
            1 => (Regime::CompressibleSubsonic, 0.45, 60_000.0),
            _ => (Regime::Supersonic, 1.9, 20_000.0),
        };
        let flow = FlowCondition {
            velocity_unit: v,
            static_pressure_pa: ps,
            mach,
        };
        if let Ok(mut p) = s7.model().port_pressures(regime, &flow) {
            for (j, x) in (0u32..).zip(p.iter_mut()) {
                *x += 5.0 * libm::sin(f64::from(7 * i + 3 * j) * 1.3);
            }
            if i % 4 == 1 {
                p[(i % 7) as usize] += 400.0; // a leak
            }
            put(d, s7.solve(&p, Some(300.0)));
        }
        if let Ok(mut p) = s5.model().port_pressures(regime, &flow) {
            for (j, x) in (0u32..).zip(p.iter_mut()) {
                *x += 5.0 * libm::sin(f64::from(5 * i + 2 * j) * 0.7);
            }
            put(d, s5.solve(&p, None));
        }
    }
}
