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
