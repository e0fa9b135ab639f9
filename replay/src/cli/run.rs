//! `replay run`: the navigator over a log, or live over a scenario.

use super::out::{Out, create, write_json};
use replay::run::{LiveOptions, build_sim, run_live, run_log};
use std::path::PathBuf;
use std::process::ExitCode;

/// Run the navigator over a log, or live over a scenario file or
/// `demo:<name>`; write the decision trace and summary; print the trace
/// digest.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// A log file, a scenario file, `demo:<name>`, or `world:<family>`
    /// (the seed picks the world).
    pub input: String,
    /// Seed for a simulated run (default: the scenario's own).
    #[arg(long)]
    pub seed: Option<u64>,
    /// Trace file (JSON Lines).
    #[arg(long, value_name = "FILE", default_value = "out/trace.jsonl")]
    pub trace: PathBuf,
    /// Summary file (JSON).
    #[arg(long, value_name = "FILE", default_value = "out/summary.json")]
    pub summary: PathBuf,
    /// Read a damaged log, skipping damaged records.
    #[arg(long)]
    pub salvage: bool,
    /// Stop a simulated run after this much time, s.
    #[arg(long, value_name = "S")]
    pub max_time: Option<f64>,
}

fn is_log(path: &str) -> bool {
    let mut magic = [0u8; 8];
    std::fs::File::open(path)
        .and_then(|mut f| std::io::Read::read_exact(&mut f, &mut magic))
        .is_ok()
        && &magic == b"UPCURLOG"
}

/// Run the command.
///
/// # Errors
/// An input that cannot be read or run, an output that cannot be written.
pub fn exec(a: Args, out: &mut Out) -> Result<ExitCode, String> {
    let input = &a.input;
    if !input.starts_with("demo:")
        && !input.starts_with("world:")
        && !std::path::Path::new(input).exists()
    {
        return Err(format!("{input}: no such file"));
    }
    let trace_w = create(&a.trace)?;
    let s = if is_log(input) {
        let f = std::fs::File::open(input).map_err(|e| format!("{input}: {e}"))?;
        run_log(
            input,
            std::io::BufReader::with_capacity(1 << 16, f),
            trace_w,
            a.salvage,
        )
        .map_err(|e| format!("{input}: {e}"))?
    } else {
        let sim = build_sim(input, a.seed).map_err(|e| e.to_string())?;
        let opts = LiveOptions {
            max_time_s: a.max_time,
            scene_every: 0,
        };
        run_live::<_, std::io::Sink>(input, sim, trace_w, None, &opts)
            .map_err(|e| e.to_string())?
            .0
            .summary
    };
    write_json(&a.summary, &s)?;
    out.text(replay::report::run_summary_text(&s));
    Ok(ExitCode::SUCCESS)
}
