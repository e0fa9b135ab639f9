//! Same computation, same bits: twice in this process, once in a separate
//! process, and against digests committed here.
//!
//! The committed digests were produced by this workload with `libm` doing
//! every transcendental function. A silent switch to the platform's maths
//! library (for example `f64::sin` from std, or nalgebra falling back to
//! std maths through feature unification) changes them and fails this test.
//! If a deliberate change to the workload or to a core numeric changes a
//! digest, update the constant in the same commit and say why.

use std::process::Command;

/// `libm_digest()` as committed.
const LIBM_DIGEST: u64 = 0x9a68_5bd4_cbd2_b230;
/// `core_workload_digest()` as committed.
const CORE_DIGEST: u64 = 0x461a_80e6_3a1c_c8e8;

#[test]
fn twice_in_process() {
    assert_eq!(
        upcurrent_tests::libm_digest(),
        upcurrent_tests::libm_digest()
    );
    assert_eq!(
        upcurrent_tests::core_workload_digest(),
        upcurrent_tests::core_workload_digest()
    );
}

fn witness() -> (u64, u64) {
    let out = Command::new(env!("CARGO_BIN_EXE_determinism-witness"))
        .output()
        .expect("run the determinism witness");
    assert!(out.status.success(), "witness failed: {:?}", out);
    let text = String::from_utf8(out.stdout).expect("utf-8");
    let mut libm = None;
    let mut core = None;
    for line in text.lines() {
        let mut it = line.split_whitespace();
        let (Some(name), Some(hex)) = (it.next(), it.next()) else {
            continue;
        };
        let v = u64::from_str_radix(hex, 16).expect("hex digest");
        match name {
            "libm" => libm = Some(v),
            "core" => core = Some(v),
            _ => {}
        }
    }
    (libm.expect("libm line"), core.expect("core line"))
}

#[test]
fn separate_process_agrees() {
    let (libm, core) = witness();
    assert_eq!(
        libm,
        upcurrent_tests::libm_digest(),
        "libm digest differs across processes"
    );
    assert_eq!(
        core,
        upcurrent_tests::core_workload_digest(),
        "core digest differs across processes"
    );
}

#[test]
fn matches_committed_digests() {
    assert_eq!(
        upcurrent_tests::libm_digest(),
        LIBM_DIGEST,
        "libm digest {:016x} != committed {:016x}",
        upcurrent_tests::libm_digest(),
        LIBM_DIGEST
    );
    assert_eq!(
        upcurrent_tests::core_workload_digest(),
        CORE_DIGEST,
        "core digest {:016x} != committed {:016x}",
        upcurrent_tests::core_workload_digest(),
        CORE_DIGEST
    );
}
