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
    /// Seed for a simulated run (default: the scenario's own; refused for
    /// a log, whose frames are fixed).
    #[arg(long)]
    pub seed: Option<u64>,
    /// Output folder: `trace.jsonl` and `summary.json` go there unless
    /// `--trace` or `--summary` name other files.
    #[arg(short = 'o', long = "out", value_name = "DIR", default_value = "out")]
    pub out: PathBuf,
    /// Trace file (JSON Lines; default `DIR/trace.jsonl`).
    #[arg(long, value_name = "FILE")]
    pub trace: Option<PathBuf>,
    /// Summary file (JSON; default `DIR/summary.json`).
    #[arg(long, value_name = "FILE")]
    pub summary: Option<PathBuf>,
    /// Read a damaged log, skipping damaged records (a log only).
    #[arg(long)]
    pub salvage: bool,
    /// Stop a simulated run after this much time, s (refused for a log).
    #[arg(long, value_name = "S", value_parser = super::check::time_limit_s)]
    pub max_time: Option<f64>,
}

/// Whether `path` is a file starting with the log magic.
pub fn is_log(path: &str) -> bool {
    let mut magic = [0u8; 8];
    std::fs::File::open(path)
        .and_then(|mut f| std::io::Read::read_exact(&mut f, &mut magic))
        .is_ok()
        && &magic == b"UPCURLOG"
}

/// Run the command.
///
/// # Errors
/// An input that cannot be read or run, an option that has no effect on
/// this input, an output that cannot be written.
pub fn exec(a: Args, out: &mut Out) -> Result<ExitCode, String> {
    let input = &a.input;
    if !input.starts_with("demo:")
        && !input.starts_with("world:")
        && !std::path::Path::new(input).exists()
    {
        return Err(format!("{input}: no such file"));
    }
    let log = is_log(input);
    if log {
        for (given, option) in [
            (a.seed.is_some(), "--seed"),
            (a.max_time.is_some(), "--max-time"),
        ] {
            if given {
                return Err(format!(
                    "{input} is a log: {option} has no effect on recorded frames"
                ));
            }
        }
    } else if a.salvage {
        return Err(format!(
            "{input} is a scenario: --salvage reads damaged logs only"
        ));
    }
    let trace = a.trace.unwrap_or_else(|| a.out.join("trace.jsonl"));
    let summary = a.summary.unwrap_or_else(|| a.out.join("summary.json"));
    let trace_w = create(&trace)?;
    let s = if log {
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
    write_json(&summary, &s)?;
    let skipped = replay::report::salvage_text(&s);
    if !skipped.is_empty() {
        out.note("run", skipped.trim_end());
    }
    out.text(replay::report::run_summary_text(&s));
    Ok(ExitCode::SUCCESS)
}
