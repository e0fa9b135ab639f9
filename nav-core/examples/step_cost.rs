//! Per-step cost of the navigator on a long invented traverse: a chain of
//! 24 ten-metre legs with a weaker dead-end stub at every node, a 7-port
//! probe's flow solution and 32 contact points per frame, 100 Hz. The map
//! (128 stations, 512 wall points, 8 junctions) is full after the first
//! few legs. A counting global allocator checks that `step` never touches
//! the heap.
//!
//! `cargo run --release -p nav-core --example step_cost [max_frames]`
//! Last line: `step_cost frames=.. median_ns=.. p99_ns=.. max_ns=..
//! heap_allocs=.. state_bytes=..`
#![allow(unsafe_code)] // a GlobalAlloc impl is unsafe by definition

#[path = "../../tests/src/nav_scene.rs"]
mod nav_scene;

use nav_core::map::WallIndex;
use nav_core::navigator::{NavConfig, StandardNavigator};
use nav_scene::{Rigid, Sim, chain_scene};
use std::alloc::{GlobalAlloc, Layout, System};
use std::sync::atomic::{AtomicU64, Ordering};
use std::time::Instant;

struct Counting;
static ALLOCS: AtomicU64 = AtomicU64::new(0);

// SAFETY: forwards every call unchanged to `System`; the counter is atomic.
unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        ALLOCS.fetch_add(1, Ordering::Relaxed);
        // SAFETY: same contract as the caller's.
        unsafe { System.alloc(layout) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        // SAFETY: same contract as the caller's.
        unsafe { System.dealloc(ptr, layout) }
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        ALLOCS.fetch_add(1, Ordering::Relaxed);
        // SAFETY: same contract as the caller's.
        unsafe { System.realloc(ptr, layout, new_size) }
    }
}

#[global_allocator]
static GLOBAL: Counting = Counting;

fn main() {
    let max_frames: usize = std::env::args()
        .nth(1)
        .and_then(|a| a.parse().ok())
        .unwrap_or(400_000);
    let cfg = NavConfig::for_robot(0.1).validate().expect("valid config");
    let mut nav = Box::new(StandardNavigator::new(cfg).expect("capacities"));
    let rigid = Rigid::new([0.2, 0.1, 1.0], 0.9, [100.0, -40.0, 7.0]);
    let mut sim = Sim::new(chain_scene(24), [0.0, 0.0, 0.0], rigid, 42, true);
    sim.wall_points = 32;
    let mut ns: Vec<u64> = Vec::with_capacity(max_frames);
    let mut heap = 0u64;
    let mut choices = 0u64;
    for _ in 0..max_frames {
        let o = sim.observe();
        let a0 = ALLOCS.load(Ordering::Relaxed);
        let t0 = Instant::now();
        let c = nav.step(&o);
        let dt = t0.elapsed();
        heap += ALLOCS.load(Ordering::Relaxed) - a0;
        ns.push(u64::try_from(dt.as_nanos()).unwrap_or(u64::MAX));
        if c.record.reason == nav_core::decide::ReasonCode::EnterBranch
            && c.record.branch.is_some_and(|b| b.chosen.is_some())
        {
            choices += 1;
        }
        sim.apply(&c);
        if sim.reached {
            break;
        }
    }
    let frames = ns.len();
    let map = nav.map();
    println!(
        "traverse: reached={} sim_time_s={:.1} min_true_clearance_m={:.3} junction_records={} stations={}/{} wall_points={}/512 enter_branch_steps={}",
        sim.reached,
        sim.t,
        sim.min_clearance_m,
        map.junctions.iter().count(),
        map.stations.len(),
        map.stations.capacity(),
        map.walls.len(),
        choices
    );
    ns.sort_unstable();
    let pick = |q: f64| ns[((frames as f64 - 1.0) * q).round() as usize];
    println!(
        "step_cost frames={} median_ns={} p99_ns={} max_ns={} heap_allocs={} state_bytes={}",
        frames,
        pick(0.5),
        pick(0.99),
        ns[frames - 1],
        heap,
        std::mem::size_of::<StandardNavigator>()
    );
}
