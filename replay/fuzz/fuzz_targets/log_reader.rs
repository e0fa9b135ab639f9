//! Any bytes into the log reader, strict and salvaging: it must not panic,
//! hang or allocate without bound. The body is `replay::log::read_any`, the
//! same function the "any bytes" property tests call.
#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let _ = replay::log::read_any(data, 1 << 16);
});
