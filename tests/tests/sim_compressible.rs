//! Compressible conduits against NACA Report 1135 (Ames Research Staff,
//! "Equations, Tables, and Charts for Compressible Flow", 1953), gamma 1.4.

use nav_core::gas::IdealGas;
use replay::sim::nozzle::Nozzle;
use replay::sim::{demos, world::World};

const AIR: IdealGas = IdealGas::DRY_AIR;

/// A converging–diverging channel: area 2 A* -> A* (throat at 1 m) ->
/// 27/16 A* at 2 m, the exit area ratio of M = 2 for gamma 1.4 (NACA 1135
/// Table I: A/A* = 1.688 at M = 2; 27/16 exactly from eq. 80).
fn channel() -> Nozzle {
    let st: Vec<f64> = (0..=200).map(|i| f64::from(i) * 0.01).collect();
    let ar: Vec<f64> = st
        .iter()
        .map(|&s| {
            if s <= 1.0 {
                2.0 - s
            } else {
                1.0 + (27.0 / 16.0 - 1.0) * (s - 1.0)
            }
        })
        .collect();
    Nozzle::new(st, ar, AIR, 300.0).unwrap()
}

/// Within half a unit of the last printed digit of a 4-significant-figure
/// table entry.
fn printed4(v: f64, table: f64) -> bool {
    let e = table.abs().log10().floor();
    (v - table).abs() <= 0.5 * 10f64.powf(e - 3.0) * (1.0 + 1e-9)
}

#[test]
fn supersonic_exit_and_sonic_throat_match_table_i() {
    let nz = channel();
    let p0 = 3.0e5;
    // Back pressure below the design value: shock-free supersonic exit.
    let st = nz.solve(p0, 0.05 * p0).unwrap();
    assert!(st.choked && st.shock.is_none());
    let me = *st.mach.last().unwrap();
    // NACA 1135 Table I, M = 2.00: p/p0 = 0.1278.
    assert!((me - 2.0).abs() < 1e-9, "exit Mach {me}");
    assert!(printed4(1.0 / AIR.p0_over_p(me).unwrap(), 0.1278));
    // Throat: M = 1, p/p0 = 0.5283 (Table I, M = 1.00).
    let mt = st.mach[100];
    assert!((mt - 1.0).abs() < 1e-9, "throat Mach {mt}");
    assert!(printed4(1.0 / AIR.p0_over_p(mt).unwrap(), 0.5283));
    // Design pressure ratio is the same table value.
    assert!(printed4(nz.design_ratio, 0.1278));
}

/// Choked mass flux mdot = Gamma A* p0 / sqrt(R T0) with Gamma = 0.6847 for
/// gamma 1.4 (the standard value of the choked-flow constant, recalled;
/// NACA 1135 eqs. 43-45 and 80 at M = 1).
#[test]
fn choked_mass_flux() {
    let nz = channel();
    let (p0, t0) = (3.0e5, 300.0);
    let st = nz.solve(p0, 0.3 * p0).unwrap();
    let expect = 0.6847 * 1.0 * p0 / (AIR.r_j_per_kg_k() * t0).sqrt();
    assert!((st.mass_flow_kg_per_s - expect).abs() <= 0.5e-4 / 0.6847 * expect * 1.0001);
    // Lowering the back pressure further changes nothing once choked.
    let st2 = nz.solve(p0, 0.1 * p0).unwrap();
    assert_eq!(st.mass_flow_kg_per_s, st2.mass_flow_kg_per_s);
}

/// A normal shock standing in the exit plane at M = 2: the back pressure is
/// p/p0(2) * p2/p1(2) = 0.1278 * 4.500 = 0.5751 of p0 (NACA 1135 Table I
/// and Table II at M1 = 2.00). Between that and the first critical ratio
/// the shock stands inside, with p02/p01 as Table II gives for its M1, and
/// the subsonic exit meets the back pressure.
#[test]
fn normal_shock_where_back_pressure_requires() {
    let nz = channel();
    assert!((nz.exit_shock_ratio - 0.1278 * 4.5).abs() < 0.5e-4 * 4.5 + 1e-4);
    let p0 = 3.0e5;
    let ratio = 0.5 * (nz.exit_shock_ratio + nz.first_critical_ratio);
    let st = nz.solve(p0, ratio * p0).unwrap();
    let sh = st.shock.expect("a shock inside");
    assert!(sh.station_m > 1.0 && sh.station_m < 2.0);
    assert!(sh.mach_upstream > 1.0 && sh.mach_upstream < 2.0);
    assert!((sh.p0_ratio - AIR.normal_shock_p02_over_p01(sh.mach_upstream).unwrap()).abs() < 1e-12);
    let me = *st.mach.last().unwrap();
    assert!(me < 1.0);
    let pe = st.p0_pa.last().unwrap() / AIR.p0_over_p(me).unwrap();
    assert!((pe - ratio * p0).abs() < 1e-6 * p0);
    // Downstream of the shock the stagnation pressure is lower.
    assert!(st.p0_pa.last().unwrap() < &p0);
    // Table II spot check of the shock relation used (M1 = 1.5: p02/p01 = 0.9298).
    assert!(printed4(
        AIR.normal_shock_p02_over_p01(1.5).unwrap(),
        0.9298
    ));
}

/// The Hollow Kettle demo: choked fissure, supersonic above the throat, a
/// normal shock below the Mouth, subsonic chimney.
#[test]
fn fumarole_demo_has_choked_supersonic_shocked_fissure() {
    let sc = demos::demo("hollow-kettle").unwrap().unwrap();
    let w = World::new(&sc).unwrap();
    let nzs = w.solution.links[0].nozzle.as_ref().unwrap();
    assert!(nzs.choked);
    let sh = nzs.shock.expect("shock in the fissure");
    let g = &w.geometry;
    let throat_s = 0.45 * g.conduits[0].length_m;
    assert!(sh.station_m > throat_s && sh.station_m < g.conduits[0].length_m);
    // Field on the centreline: subsonic below the throat, supersonic between
    // throat and shock, subsonic after it.
    let m_at = |s: f64| w.sample(g.point_at(0, s)).mach;
    assert!(m_at(0.5 * throat_s) < 1.0);
    assert!(m_at(0.5 * (throat_s + sh.station_m)) > 1.2);
    assert!(m_at(sh.station_m + 0.3) < 1.0);
    // Choked flux through the throat (radius 0.12 m) from the pocket's state.
    let a_t = core::f64::consts::PI * 0.12 * 0.12;
    let mstar = IdealGas::WATER_VAPOUR
        .choked_mass_flow_kg_per_s(a_t, 160_000.0, 410.0)
        .unwrap();
    assert!((nzs.mass_flow_kg_per_s - mstar).abs() < 1e-9 * mstar);
}

/// The network solve with a compressible fissure converges over the whole
/// range of reservoir pressures (unchoked subsonic, choked with a shock,
/// choked and supersonic to the Mouth), and the fissure's mass flow rises
/// with the reservoir pressure, choked flow in proportion to it
/// (mdot = Gamma A* p0 / sqrt(R T0)).
#[test]
fn fissure_solves_across_reservoir_pressures() {
    let base = demos::demo_text("hollow-kettle").unwrap();
    let mut last = 0.0;
    let mut choked_seen = false;
    for p0 in [
        86_300.0, 88_000.0, 95_000.0, 120_000.0, 160_000.0, 250_000.0, 400_000.0,
    ] {
        let text = base.replace(
            "stagnation_pressure_pa = 160000.0",
            &format!("stagnation_pressure_pa = {p0:.1}"),
        );
        let sc = replay::sim::scenario::Scenario::from_toml_str(&text).unwrap();
        let w = World::new(&sc).unwrap_or_else(|e| panic!("p0 {p0}: {e}"));
        let st = w.solution.links[0].nozzle.as_ref().unwrap();
        let m = st.mass_flow_kg_per_s;
        assert!(m > last, "p0 {p0}: {m} after {last}");
        if st.choked {
            choked_seen = true;
            let a_t = core::f64::consts::PI * 0.12 * 0.12;
            let mstar = IdealGas::WATER_VAPOUR
                .choked_mass_flow_kg_per_s(a_t, p0, 410.0)
                .unwrap();
            assert!((m - mstar).abs() < 1e-9 * mstar);
        }
        // Fissure in = chimney + shelf + weep out at the Mouth.
        let out: f64 = (1..4).map(|c| w.solution.links[c].mass_flow_kg_per_s).sum();
        assert!((out - m).abs() <= 1e-9 * m, "p0 {p0}");
        last = m;
    }
    assert!(choked_seen);
}
