//! Size and speed of the log format for a typical frame: 7 ports, 8 joints,
//! 8 contacts (synthetic frames, `replay::log::synth`).
//!
//! ```sh
//! cargo run --release -p replay --example log_size [frames]
//! ```
//! The last line is machine-readable.

fn main() {
    let n: u32 = std::env::args()
        .nth(1)
        .and_then(|s| s.parse().ok())
        .unwrap_or(1_000_000);
    let t = match replay::log::synth::throughput(n) {
        Ok(t) => t,
        Err(e) => {
            eprintln!("log_size: {e}");
            std::process::exit(2);
        }
    };
    #[allow(clippy::cast_precision_loss)]
    let frames = t.frames as f64;
    #[allow(clippy::cast_precision_loss)]
    let mb = t.bytes as f64 / 1e6;
    println!("frames written and read back: {}", t.frames);
    println!(
        "log size: {mb:.1} MB, {:.1} bytes per frame (frame header included)",
        t.bytes_per_frame
    );
    println!(
        "write: {:.3} s, {:.0} frames/s",
        t.write_s,
        frames / t.write_s
    );
    println!(
        "read:  {:.3} s, {:.0} frames/s (frame check, CRC, decode)",
        t.read_s,
        frames / t.read_s
    );
    println!(
        "log_size frames={} bytes_per_frame={:.1} write_frames_per_s={:.0} read_frames_per_s={:.0}",
        t.frames,
        t.bytes_per_frame,
        frames / t.write_s,
        frames / t.read_s
    );
}
