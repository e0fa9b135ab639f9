//! Puts memory.x on the linker path and the frame file (written by
//! `cargo run -p nav-c --example firmware_frames`, path in UPC_FRAMES,
//! default ../target/firmware-frames.bin) where `include_bytes!` finds it.
use std::path::PathBuf;

fn main() {
    let out = PathBuf::from(std::env::var("OUT_DIR").expect("OUT_DIR"));
    std::fs::copy("memory.x", out.join("memory.x")).expect("memory.x");
    println!("cargo:rustc-link-search={}", out.display());
    println!("cargo:rerun-if-changed=memory.x");
    let frames =
        std::env::var("UPC_FRAMES").unwrap_or_else(|_| "../target/firmware-frames.bin".into());
    std::fs::copy(&frames, out.join("frames.bin"))
        .unwrap_or_else(|e| panic!("{frames}: {e} (run the firmware_frames example first)"));
    println!("cargo:rerun-if-changed={frames}");
    println!("cargo:rerun-if-env-changed=UPC_FRAMES");
}
