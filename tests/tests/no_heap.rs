//! Proves that the `nav-core` API performs no heap allocation.
//!
//! A counting global allocator wraps the system one; each check runs a core
//! entry point and asserts that the count for this thread did not move.
//! Every new core entry point must be added here.
#![allow(unsafe_code)] // a GlobalAlloc impl is unsafe by definition

use std::alloc::{GlobalAlloc, Layout, System};
use std::cell::Cell;

struct Counting;

thread_local! {
    static ALLOCS: Cell<u64> = const { Cell::new(0) };
}

// SAFETY: forwards every call unchanged to `System`; the thread-local
// counter is a const-initialised `Cell` and never allocates.
unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        ALLOCS.with(|c| c.set(c.get() + 1));
        // SAFETY: same contract as the caller's.
        unsafe { System.alloc(layout) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        // SAFETY: same contract as the caller's.
        unsafe { System.dealloc(ptr, layout) }
    }
    unsafe fn alloc_zeroed(&self, layout: Layout) -> *mut u8 {
        ALLOCS.with(|c| c.set(c.get() + 1));
        // SAFETY: same contract as the caller's.
        unsafe { System.alloc_zeroed(layout) }
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        ALLOCS.with(|c| c.set(c.get() + 1));
        // SAFETY: same contract as the caller's.
        unsafe { System.realloc(ptr, layout, new_size) }
    }
}

#[global_allocator]
static GLOBAL: Counting = Counting;

/// Heap allocations made by this thread while `f` runs.
fn allocations_during<R>(f: impl FnOnce() -> R) -> (u64, R) {
    let before = ALLOCS.with(Cell::get);
    let r = f();
    let after = ALLOCS.with(Cell::get);
    (after - before, r)
}

#[test]
fn the_counter_sees_allocations() {
    // Guard against a counter that never counts: a Vec must register.
    let (n, v) = allocations_during(|| vec![1u8; 64]);
    assert!(n >= 1, "counting allocator missed a Vec allocation");
    assert_eq!(v.len(), 64);
}

#[test]
fn gas_relations_do_not_allocate() {
    let (n, digest) = allocations_during(upcurrent_tests::core_workload_digest);
    assert_eq!(n, 0, "gas workload allocated {n} times");
    assert_ne!(digest, 0);
}

#[test]
fn frame_handling_does_not_allocate() {
    use nav_core::frame::{Contact, SensorFrame};
    let (n, count) = allocations_during(|| {
        let mut f: SensorFrame<7, 8, 32> = SensorFrame::empty(1.0);
        for k in 0..40u16 {
            let _ = f.push_contact(Contact {
                module: k % 4,
                sensor: k,
                force_n: 1.0,
                normal_module: None,
            });
        }
        f.contacts().len()
    });
    assert_eq!(n, 0);
    assert_eq!(count, 32);
}

#[test]
fn probe_does_not_allocate() {
    use nav_core::gas::IdealGas;
    use nav_core::probe::calib::{CalSample, CalScheme, CalTable, build_table};
    use nav_core::probe::chi2::chi_square_quantile_upper;
    use nav_core::probe::{
        FlowCondition, PortSet, ProbeLayout, ProbeSolver, Regime, SolveOptions, SolverConfig,
        Start, deg,
    };
    let gas = IdealGas::DRY_AIR;
    // Calibration table built (with std, allocating) outside the check.
    let layout7 = ProbeLayout::seven_port(deg(40.0), 5.0).unwrap();
    let model = ProbeSolver::new(layout7, gas, SolverConfig::default()).unwrap();
    let mut sweep = Vec::new();
    for i in 0..=20u32 {
        let t = deg(3.0 * f64::from(i));
        let steps = if i == 0 {
            1
        } else {
            (120.0 * t.sin()).ceil() as u32
        };
        for j in 0..steps {
            let ph = 2.0 * std::f64::consts::PI * f64::from(j) / f64::from(steps);
            let v = [-t.cos(), -t.sin() * ph.cos(), -t.sin() * ph.sin()];
            let f = FlowCondition::from_dynamic_pressure(&gas, v, 1e5, 500.0).unwrap();
            let p = model
                .model()
                .port_pressures(Regime::Incompressible, &f)
                .unwrap();
            sweep.push(CalSample {
                velocity_unit: v,
                total_pressure_pa: 1e5 + 500.0,
                static_pressure_pa: 1e5,
                pressures_pa: p,
            });
        }
    }
    let table = build_table(CalScheme::SevenHoleGallington, &sweep).unwrap();

    let (n, ok) = allocations_during(|| {
        let s7 = ProbeSolver::new(layout7, gas, SolverConfig::default()).unwrap();
        let layout5 = ProbeLayout::five_port(deg(45.0), 5.0).unwrap();
        let s5 = ProbeSolver::new(layout5, gas, SolverConfig::default()).unwrap();
        let v = [-0.9, -0.3, -(1.0f64 - 0.81 - 0.09).sqrt()];
        let f = FlowCondition::from_dynamic_pressure(&gas, v, 101_325.0, 500.0).unwrap();
        let mut p7 = s7
            .model()
            .port_pressures(Regime::Incompressible, &f)
            .unwrap();
        let p5 = s5
            .model()
            .port_pressures(Regime::Incompressible, &f)
            .unwrap();
        let a = s7.solve(&p7, Some(293.0)).is_ok();
        let b = s5.solve(&p5, Some(293.0)).is_ok();
        p7[3] += 300.0; // leak: chi-square test and leave-one-out isolation
        let c = s7.solve(&p7, None).is_ok();
        let opts = SolveOptions {
            excluded: PortSet::EMPTY.with(3),
            start: Some(Start { velocity_unit: v }),
        };
        let d = s7.solve_with(&p7, None, &opts).is_ok();
        let e = s7.solve_slice(&[1e5; 3], None).is_err();
        let sup = FlowCondition {
            velocity_unit: v,
            static_pressure_pa: 2e4,
            mach: 2.0,
        };
        let ps = s7.model().port_pressures(Regime::Supersonic, &sup).unwrap();
        let g = s7.solve(&ps, Some(400.0)).is_ok();
        let t = CalTable::new(CalScheme::SevenHoleGallington, &table).unwrap();
        let h = t
            .evaluate(
                &s7.model()
                    .port_pressures(Regime::Incompressible, &f)
                    .unwrap(),
            )
            .is_ok();
        let k = chi_square_quantile_upper(3, 1e-3).is_ok();
        a && b && c && d && e && g && h && k
    });
    assert_eq!(n, 0, "probe allocated {n} times");
    assert!(ok);
}
