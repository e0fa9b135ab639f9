//! Replay throughput: decoding plus navigator, one core.
//!
//! 1. Generates a log of at least 2 million frames (over five hours at
//!    100 Hz) of the Hollow Kettle demo into a temporary file, streaming
//!    every frame to disk as it is made. The navigator is in the loop (the
//!    same loop as `replay::run::run_live`); when it stops driving (it
//!    reaches the source, or gives up) the truth-following oracle in patrol
//!    mode (`replay::sim::Oracle::patrol`) takes over, so the robot keeps
//!    moving and the log keeps varied frames. Reports bytes per frame.
//! 2. Replays the log three times, streaming from the file, each time
//!    through a fresh navigator: with `replay::run::run_log` and the trace
//!    written to a file (what `replay run` does), the same with the trace
//!    serialised but thrown away (`io::sink()`), and as the headline figure
//!    counts it, decoding plus navigator without a trace, every command fed
//!    to a digest. All three are timed; the last line is the third, and the
//!    line before it (`replay_traced ...`) the first.
//!
//! `cargo run --release -p replay --example replay_throughput [-- <frames> [<log>]]`
//!
//! With a `<log>` path the log is kept there (and reused, without
//! generating, when the file already exists), and the traced replay is
//! skipped: that is the form for counting instructions, with callgrind
//! collecting only the never-inlined `replay_throughput::decode_and_navigate`
//! (see `DEVELOPERS.md`).
//!
//! Peak RSS (`VmHWM` from `/proc/self/status`) is printed after generation
//! and after the replay; both phases stream, so neither grows with the log.
//! Last line:
//! `replay_throughput frames=<n> seconds=<s> frames_per_s=<x> realtime_factor=<y> peak_rss_mb=<z>`

use std::io::{BufReader, BufWriter, Write};
use std::path::Path;

use replay::log::{LogReader, LogWriter, ReadOptions, Record};
use replay::run::peak_rss_mb;
use replay::run::{AnyNavigator, header_for, run_log};
use replay::sim::{MotionCommand, Oracle};

type Res<T> = Result<T, Box<dyn std::error::Error>>;

const DEMO: &str = "demo:hollow-kettle";

fn main() -> Res<()> {
    let frames: u64 = std::env::args()
        .nth(1)
        .and_then(|a| a.parse().ok())
        .unwrap_or(2_016_000);
    let kept = std::env::args().nth(2).map(std::path::PathBuf::from);
    let path = kept.clone().unwrap_or_else(|| {
        std::env::temp_dir().join(format!("replay_throughput_{}.upl", std::process::id()))
    });
    let dt = if kept.is_some() && path.exists() {
        println!("reusing {}", path.display());
        replay::run::build_sim(DEMO, None)?.time_step_s()
    } else {
        generate(frames, &path)?
    };
    if kept.is_none() {
        traced_replay(&path)?;
    }

    // Replay as the issue counts it: decoding plus navigator (every command
    // still digested, so nothing is optimised away).
    let t0 = std::time::Instant::now();
    let (n, digest) = decode_and_navigate(&path)?;
    let seconds = t0.elapsed().as_secs_f64();
    let rss = peak_rss_mb();
    if kept.is_none() {
        std::fs::remove_file(&path)?;
    }
    println!("replayed {n} frames, decode + navigator: command digest {digest:016x}");
    println!("peak_rss_mb after replay {rss:.1}");
    let fps = n as f64 / seconds;
    println!(
        "replay_throughput frames={n} seconds={seconds:.2} frames_per_s={fps:.0} realtime_factor={:.0} peak_rss_mb={rss:.1}",
        fps * dt
    );
    Ok(())
}

/// Write the log; returns the time step.
fn generate(frames: u64, path: &Path) -> Res<f64> {
    let demo = DEMO;
    // Generation: streamed to disk.
    let mut sim = replay::run::build_sim(demo, None)?;
    let dt = sim.time_step_s();
    let header = header_for(&sim, demo);
    let file = std::fs::File::create(path)?;
    let mut log = LogWriter::new(BufWriter::with_capacity(1 << 16, file), &header)?;
    let mut nav = AnyNavigator::new(sim.robot_spec(), &sim.gas_spec())?;
    let mut oracle: Option<Oracle> = None;
    let mut nav_frames = 0u64;
    let t_gen = std::time::Instant::now();
    let mut frame = sim.frame().clone();
    for i in 0..frames {
        log.write_frame(&frame)?;
        let cmd = match oracle.as_mut() {
            Some(o) => o.command(&sim),
            None => {
                let c = nav.step(&frame)?;
                nav_frames += 1;
                let gave_up = matches!(c.record.reason, nav_core::decide::ReasonCode::GaveUp);
                if gave_up || sim.outcome().reached_source {
                    println!(
                        "navigator drove {} frames ({}); patrol oracle from here",
                        i + 1,
                        if gave_up { "gave up" } else { "reached source" }
                    );
                    oracle = Some(Oracle::patrol(&sim));
                }
                MotionCommand {
                    heading_map: c.heading_map,
                    speed_m_per_s: c.speed_m_per_s,
                }
            }
        };
        frame = sim.step(&cmd).clone();
    }
    let mut out = log.finish("replay_throughput")?;
    out.flush()?;
    drop(out);
    let gen_s = t_gen.elapsed().as_secs_f64();
    let bytes = std::fs::metadata(path)?.len();
    println!(
        "generated {frames} frames ({:.2} h at {:.0} Hz, {nav_frames} with the navigator in the loop) in {gen_s:.1} s",
        frames as f64 * dt / 3600.0,
        1.0 / dt
    );
    println!(
        "log {} : {bytes} bytes, {:.1} bytes per frame",
        path.display(),
        bytes as f64 / frames as f64
    );
    println!("peak_rss_mb after generation {:.1}", peak_rss_mb());
    Ok(dt)
}

/// Replay with the trace (JSON Lines): written to a file, as `replay run`
/// does, then serialised to a sink (the serialising alone).
fn traced_replay(path: &Path) -> Res<()> {
    let demo = DEMO;
    let trace_path = path.with_extension("trace.jsonl");
    let file = std::fs::File::open(path)?;
    let out = BufWriter::with_capacity(1 << 16, std::fs::File::create(&trace_path)?);
    let t0 = std::time::Instant::now();
    let summary = run_log(demo, BufReader::with_capacity(1 << 16, file), out, false)?;
    let file_s = t0.elapsed().as_secs_f64();
    let trace_bytes = std::fs::metadata(&trace_path)?.len();
    std::fs::remove_file(&trace_path)?;
    let n = summary.trace.steps;
    println!(
        "replayed {n} frames with the trace written to a file: {file_s:.2} s ({:.0} frames/s), {:.0} bytes of trace per frame, {}, digest {}, reasons {:?}",
        n as f64 / file_s,
        trace_bytes as f64 / n.max(1) as f64,
        summary.outcome,
        summary.trace.trace_digest,
        summary.trace.reasons
    );
    let file = std::fs::File::open(path)?;
    let t0 = std::time::Instant::now();
    let sunk = run_log(
        demo,
        BufReader::with_capacity(1 << 16, file),
        std::io::sink(),
        false,
    )?;
    let sink_s = t0.elapsed().as_secs_f64();
    let m = sunk.trace.steps;
    println!(
        "replayed {m} frames with the trace serialised to a sink: {sink_s:.2} s ({:.0} frames/s)",
        m as f64 / sink_s
    );
    println!(
        "replay_traced frames={n} seconds={file_s:.2} frames_per_s={:.0} trace_bytes_per_frame={:.0}",
        n as f64 / file_s,
        trace_bytes as f64 / n.max(1) as f64
    );
    Ok(())
}

/// Decoding plus navigator, every command fed to a digest; returns the
/// frames replayed and the digest. Never inlined, so callgrind can collect
/// this call alone.
#[inline(never)]
fn decode_and_navigate(path: &Path) -> Res<(u64, u64)> {
    let file = std::fs::File::open(path)?;
    let mut reader = LogReader::open(
        BufReader::with_capacity(1 << 16, file),
        ReadOptions::default(),
    )?;
    let header = reader.header().clone();
    let mut nav = AnyNavigator::new(&header.robot, &header.gas)?;
    let mut digest = nav_core::digest::Fnv64::new();
    let mut n = 0u64;
    while let Some(rec) = reader.next_record()? {
        if let Record::Frame(f) = rec {
            let cmd = nav.step(&f)?;
            cmd.digest_into(&mut digest);
            n += 1;
        }
    }
    Ok((n, digest.finish()))
}
