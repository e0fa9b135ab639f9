//! Proves that the log reader's memory is bounded: by the largest record it
//! accepts, not by the log's length, and not by lengths claimed inside
//! damaged or hostile bytes.
//!
//! A global allocator wraps the system one and tracks, per thread, the live
//! heap bytes and their peak.
#![allow(unsafe_code)] // a GlobalAlloc impl is unsafe by definition

use std::alloc::{GlobalAlloc, Layout, System};
use std::cell::Cell;

use replay::log::synth::{demo_header, synthetic_frame};
use replay::log::{LogReader, LogWriter, ReadOptions, Record, read_any};

struct Tracking;

thread_local! {
    static LIVE: Cell<i64> = const { Cell::new(0) };
    static PEAK: Cell<i64> = const { Cell::new(0) };
}

fn grow(n: usize) {
    let n = i64::try_from(n).unwrap_or(i64::MAX);
    LIVE.with(|l| {
        let v = l.get().saturating_add(n);
        l.set(v);
        PEAK.with(|p| p.set(p.get().max(v)));
    });
}

fn shrink(n: usize) {
    let n = i64::try_from(n).unwrap_or(i64::MAX);
    LIVE.with(|l| l.set(l.get().saturating_sub(n)));
}

// SAFETY: forwards every call unchanged to `System`; the thread-local
// counters are const-initialised `Cell`s and never allocate.
unsafe impl GlobalAlloc for Tracking {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        grow(layout.size());
        // SAFETY: same contract as the caller's.
        unsafe { System.alloc(layout) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        shrink(layout.size());
        // SAFETY: same contract as the caller's.
        unsafe { System.dealloc(ptr, layout) }
    }
    unsafe fn alloc_zeroed(&self, layout: Layout) -> *mut u8 {
        grow(layout.size());
        // SAFETY: same contract as the caller's.
        unsafe { System.alloc_zeroed(layout) }
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        shrink(layout.size());
        grow(new_size);
        // SAFETY: same contract as the caller's.
        unsafe { System.realloc(ptr, layout, new_size) }
    }
}

#[global_allocator]
static GLOBAL: Tracking = Tracking;

/// Peak heap bytes above the starting level while `f` runs on this thread.
fn peak_during<R>(f: impl FnOnce() -> R) -> (i64, R) {
    let base = LIVE.with(Cell::get);
    PEAK.with(|p| p.set(base));
    let r = f();
    (PEAK.with(Cell::get) - base, r)
}

#[test]
fn the_tracker_sees_allocations() {
    let (peak, v) = peak_during(|| vec![1u8; 1 << 20].len());
    assert!(peak >= 1 << 20, "tracker missed a 1 MiB Vec (peak {peak})");
    assert_eq!(v, 1 << 20);
}

fn log_of(frames: u32) -> Vec<u8> {
    let mut w = LogWriter::new(Vec::new(), &demo_header(9)).unwrap();
    for i in 0..frames {
        w.write_frame(&synthetic_frame(i, 7, 8, 8)).unwrap();
    }
    w.finish("").unwrap()
}

fn read_all(bytes: &[u8], opts: ReadOptions) -> u64 {
    let mut r = LogReader::open(bytes, opts).unwrap();
    let mut n = 0;
    while let Some(rec) = r.next_record().unwrap() {
        if let Record::Frame(_) = rec {
            n += 1;
        }
    }
    n
}

#[test]
fn reading_memory_does_not_grow_with_the_log() {
    let short = log_of(1_000);
    let long = log_of(20_000);
    assert!(long.len() > 9_000_000);
    for opts in [ReadOptions::default(), ReadOptions::salvage()] {
        let (peak_short, n) = peak_during(|| read_all(&short, opts));
        assert_eq!(n, 1_000);
        let (peak_long, n) = peak_during(|| read_all(&long, opts));
        assert_eq!(n, 20_000);
        // Look-ahead buffer (64 KiB) plus one frame and the header: a
        // fixed amount, the same for both lengths.
        assert!(peak_long < 128 * 1024, "peak {peak_long} bytes");
        assert!(
            peak_long <= peak_short + 4096,
            "{peak_long} vs {peak_short}"
        );
    }
}

/// A u64 of 2^32 or more in bincode 2's variable-length integer encoding
/// (standard config): marker byte 253, then 8 little-endian bytes (bincode
/// 2 specification, `docs/spec.md`, "Varint encoding").
fn varint_u64_big(v: u64) -> Vec<u8> {
    let mut out = vec![253u8];
    out.extend_from_slice(&v.to_le_bytes());
    out
}

#[test]
fn hostile_lengths_inside_intact_frames_allocate_little() {
    // Frames with valid CRCs whose payloads claim huge containers: a note
    // string of 2^40 bytes, and port and contact vectors of 2^40 elements.
    let mut note = 0.5f64.to_le_bytes().to_vec();
    note.push(3); // Event::Note
    note.extend(varint_u64_big(1 << 40));
    note.extend_from_slice(b"short");
    let mut frame = 0.5f64.to_le_bytes().to_vec();
    frame.push(0); // pose: None
    frame.push(0); // joints: None
    frame.push(1); // ports: Some
    frame.extend(varint_u64_big(1 << 40));
    frame.extend_from_slice(&[0u8; 64]);
    let mut w = LogWriter::new(Vec::new(), &demo_header(2)).unwrap();
    w.write_raw(2, &note).unwrap();
    w.write_raw(1, &frame).unwrap();
    w.write_frame(&synthetic_frame(0, 7, 1, 0)).unwrap();
    let bytes = w.finish("").unwrap();
    let (peak, (damage, frames)) = peak_during(|| {
        let mut r = LogReader::open(bytes.as_slice(), ReadOptions::salvage()).unwrap();
        let mut frames = 0;
        while let Some(rec) = r.next_record().unwrap() {
            frames += u32::from(matches!(rec, Record::Frame(_)));
        }
        (r.damage().len(), frames)
    });
    assert_eq!(damage, 2, "both hostile frames are reported undecodable");
    assert_eq!(frames, 1);
    // serde caps pre-allocation per container at 1 MiB; nothing near the
    // claimed 2^40.
    assert!(peak < 4 << 20, "peak {peak} bytes");
}

#[test]
fn random_bytes_allocate_little() {
    // A deterministic byte soup after a valid header, and pure noise.
    let header = {
        let log = log_of(0);
        let n = LogReader::open(log.as_slice(), ReadOptions::default())
            .unwrap()
            .header_bytes();
        log[..usize::try_from(n).unwrap()].to_vec()
    };
    let mut state = 0x2545_f491_4f6c_dd1du64;
    let mut noise = Vec::with_capacity(1 << 20);
    for _ in 0..(1 << 20) {
        // xorshift64 (Marsaglia 2003), only to make bytes.
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        noise.push(u8::try_from(state >> 56).unwrap());
    }
    let with_header = [header.as_slice(), noise.as_slice()].concat();
    for bytes in [&noise, &with_header] {
        let (peak, _) = peak_during(|| read_any(bytes, 1 << 20));
        assert!(peak < 4 << 20, "peak {peak} bytes");
    }
}
