//! The C interface allocates nothing in `upc_navigator_init` and
//! `upc_navigator_step` (the host log helpers, which do, stay outside the
//! count).
#![cfg(feature = "host")]
#![allow(unsafe_code)]

use nav_c::*;
use std::alloc::{GlobalAlloc, Layout, System};
use std::cell::Cell;
use std::mem::MaybeUninit;

struct Counting;

thread_local! {
    static ALLOCS: Cell<u64> = const { Cell::new(0) };
}

// SAFETY: forwards to the system allocator, counting calls per thread.
unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        ALLOCS.with(|c| c.set(c.get() + 1));
        // SAFETY: the caller's layout, passed through.
        unsafe { System.alloc(layout) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        // SAFETY: passed through.
        unsafe { System.dealloc(ptr, layout) }
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        ALLOCS.with(|c| c.set(c.get() + 1));
        // SAFETY: passed through.
        unsafe { System.realloc(ptr, layout, new_size) }
    }
}

#[global_allocator]
static A: Counting = Counting;

#[repr(C, align(16))]
struct Storage([u8; 96 * 1024]);

#[test]
fn init_and_step_do_not_allocate() {
    let path = std::ffi::CString::new(format!(
        "{}/../fixtures/logs/wrens-3-10s.upl",
        env!("CARGO_MANIFEST_DIR")
    ))
    .unwrap();
    // SAFETY: valid pointers throughout.
    unsafe {
        let mut err = MaybeUninit::<UpcError>::zeroed().assume_init();
        // Frames and configuration first (the log reader allocates).
        let log = upc_log_open(path.as_ptr(), &mut err);
        assert!(!log.is_null());
        let mut cfg = upc_config_default();
        assert_eq!(upc_log_config(log, &mut cfg, &mut err), UPC_OK);
        let mut frames: Vec<UpcFrame> = Vec::new();
        let mut f = MaybeUninit::<UpcFrame>::zeroed().assume_init();
        while upc_log_next_frame(log, &mut f, &mut err) == UPC_FRAME {
            frames.push(f);
        }
        upc_log_close(log);
        let mut mem = Box::new(Storage([0; 96 * 1024]));
        let raw = std::ptr::addr_of_mut!(mem.0).cast::<core::ffi::c_void>();
        let mut cmd = UpcCommand::default();
        let before = ALLOCS.with(Cell::get);
        // The counter sees allocations: reading the log made some.
        assert!(before > 0);
        assert_eq!(upc_navigator_init(raw, 96 * 1024, &cfg, &mut err), UPC_OK);
        let nav = raw.cast::<UpcNavigator>();
        for fr in &frames {
            assert_eq!(upc_navigator_step(nav, fr, &mut cmd, &mut err), UPC_OK);
        }
        // An error path too: it writes the message without the heap.
        cfg.modules[0].radius_m = f64::NAN;
        assert_eq!(
            upc_navigator_init(raw, 96 * 1024, &cfg, &mut err),
            UPC_ERR_BODY
        );
        let n = ALLOCS.with(Cell::get) - before;
        assert_eq!(n, 0, "the C interface allocated {n} times");
        assert!(frames.len() > 900);
    }
}
