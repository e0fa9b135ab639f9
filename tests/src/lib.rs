//! Shared workloads for the cross-crate tests.
//!
//! [`core_workload_digest`] runs a fixed, deterministic computation through
//! `nav-core` and returns its FNV-1a digest. The determinism test runs it in
//! this process and, through the `determinism-witness` binary, in a separate
//! one, and compares both with the constants committed in
//! `tests/determinism.rs`. Every new core entry point should be fed here.

pub mod nav_scene;

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

/// A closed-loop navigator run over an invented fork (the strongest wide
/// branch is a dead end, the strongest overall is too narrow): follow,
/// sampling, choice, entry, back-out, resumption. Every command is fed to
/// `d`. No heap allocation (the navigator lives on the stack).
pub fn navigator_workload(d: &mut Fnv64) {
    use nav_core::navigator::{NavConfig, StandardNavigator};
    use nav_scene::{ForkBranch, Rigid, Sim, fork_scene_len};
    let branches = [
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
            dead_end: true,
        },
        ForkBranch {
            yaw_rad: 0.0,
            width_m: 0.2,
            dynamic_pressure_pa: 500.0,
            dead_end: false,
        },
    ];
    let scene = fork_scene_len(0.3, 40.0, &branches, 1.5);
    let rigid = Rigid::new([0.3, -0.2, 1.0], 0.7, [12.0, -3.0, 1.5]);
    let mut sim = Sim::new(scene, [-1.5, 0.02, 0.0], rigid, 2024, true);
    let Ok(cfg) = NavConfig::for_robot(0.1).validate() else {
        d.u64(u64::MAX);
        return;
    };
    let Ok(mut nav) = StandardNavigator::new(cfg) else {
        d.u64(u64::MAX);
        return;
    };
    for _ in 0..8000 {
        let o = sim.observe();
        let c = nav.step(&o);
        c.digest_into(d);
        sim.apply(&c);
        if sim.reached {
            break;
        }
    }
    d.u64(u64::from(sim.reached));
}

/// The core's own numerics: gas relations and their root-finding inverses,
/// then a navigator run ([`navigator_workload`]).
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
    navigator_workload(&mut d);
    d.finish()
}
