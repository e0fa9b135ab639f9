//! `replay generate`: record a closed-loop simulation as a log.

use super::out::{Out, create, finish};
use replay::log::LogWriter;
use replay::run::{LiveOptions, build_sim, header_for, run_live};
use std::path::PathBuf;
use std::process::ExitCode;

/// Simulate a scenario with the navigator in the loop and record what the
/// robot sensed as a log.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// A scenario file, or `demo:<name>`.
    pub scenario: String,
    /// Seed (default: the scenario's own).
    #[arg(long)]
    pub seed: Option<u64>,
    /// The log to write.
    #[arg(short = 'o', long = "out", value_name = "LOG")]
    pub out: PathBuf,
    /// Stop after this much simulated time, s.
    #[arg(long, value_name = "S")]
    pub max_time: Option<f64>,
}

/// Run the command.
///
/// # Errors
/// A scenario that cannot be loaded, a run that cannot be done, a log that
/// cannot be written.
pub fn exec(a: Args, out: &mut Out) -> Result<ExitCode, String> {
    let sim = build_sim(&a.scenario, a.seed).map_err(|e| e.to_string())?;
    let header = header_for(&sim, &a.scenario);
    let writer = LogWriter::new(create(&a.out)?, &header).map_err(|e| e.to_string())?;
    let opts = LiveOptions {
        max_time_s: a.max_time,
        scene_every: 0,
    };
    let (res, w) = run_live(&a.scenario, sim, std::io::sink(), Some(writer), &opts)
        .map_err(|e| e.to_string())?;
    if let Some(w) = w {
        finish(w, &a.out)?;
    }
    out.line(format_args!(
        "wrote {} frames to {} ({}); trace digest {}",
        res.summary.trace.steps,
        a.out.display(),
        res.summary.outcome,
        res.summary.trace.trace_digest
    ));
    Ok(ExitCode::SUCCESS)
}
