//! `replay plot`: draw a run as SVG.

use super::out::{Out, write_file};
use replay::run::{LiveOptions, build_sim, run_live};
use std::path::PathBuf;
use std::process::ExitCode;

/// Draw a simulated run as SVG: top and side views.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// A scenario file or `demo:<name>`.
    pub input: String,
    /// Seed (default: the scenario's own).
    #[arg(long)]
    pub seed: Option<u64>,
    /// The SVG to write.
    #[arg(
        short = 'o',
        long = "out",
        value_name = "SVG",
        default_value = "out/run.svg"
    )]
    pub out: PathBuf,
    /// Stop after this much simulated time, s.
    #[arg(long, value_name = "S")]
    pub max_time: Option<f64>,
}

/// Run the command.
///
/// # Errors
/// A scenario that cannot be loaded or run, an SVG that cannot be written.
pub fn exec(a: Args, out: &mut Out) -> Result<ExitCode, String> {
    let sim = build_sim(&a.input, a.seed).map_err(|e| e.to_string())?;
    let opts = LiveOptions {
        max_time_s: a.max_time,
        ..LiveOptions::default()
    };
    let (res, _) = run_live::<_, std::io::Sink>(&a.input, sim, std::io::sink(), None, &opts)
        .map_err(|e| e.to_string())?;
    write_file(&a.out, replay::plot::render_svg(&res.scene).as_bytes())?;
    out.line(format_args!(
        "{}: {}; wrote {}",
        a.input,
        res.summary.outcome,
        a.out.display()
    ));
    Ok(ExitCode::SUCCESS)
}
