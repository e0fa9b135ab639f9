//! `Sim::step` reuses its frame buffers: once warmed up, stepping (with the
//! oracle commanding) allocates nothing.
#![allow(unsafe_code)] // a GlobalAlloc impl is unsafe by definition

use std::alloc::{GlobalAlloc, Layout, System};
use std::cell::Cell;

use replay::sim::{Oracle, Sim};

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
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        ALLOCS.with(|c| c.set(c.get() + 1));
        // SAFETY: same contract as the caller's.
        unsafe { System.realloc(ptr, layout, new_size) }
    }
}

#[global_allocator]
static GLOBAL: Counting = Counting;

fn allocs() -> u64 {
    ALLOCS.with(Cell::get)
}

#[test]
fn stepping_does_not_allocate_once_warm() {
    for key in ["hollow-kettle", "wrens-slot"] {
        let mut sim = Sim::from_demo(key).unwrap();
        let mut o = Oracle::patrol(&sim);
        // Warm up past the first arrival (recording the source's id is the
        // one allocation of a run).
        for _ in 0..10_000 {
            let c = o.command(&sim);
            sim.step(&c);
        }
        assert!(sim.outcome().reached_source, "{key}");
        let before = allocs();
        for _ in 0..6000 {
            let c = o.command(&sim);
            sim.step(&c);
        }
        assert_eq!(allocs() - before, 0, "{key}");
    }
}
