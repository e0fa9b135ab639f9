//! Prints the workload digests, one per line, so a test can compare them
//! across processes.

fn main() {
    println!("libm {:016x}", upcurrent_tests::libm_digest());
    println!("core {:016x}", upcurrent_tests::core_workload_digest());
}
