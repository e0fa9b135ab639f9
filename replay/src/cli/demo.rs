//! `replay demo`: a built-in demo, closed loop, with trace, summary and
//! plot.

use super::out::{Out, create, write_file, write_json};
use replay::run::{LiveOptions, build_sim, run_live};
use std::path::PathBuf;
use std::process::ExitCode;

/// The demo the README's first command runs.
const DEFAULT_DEMO: &str = "wrens-slot";

/// Simulate a built-in demo scenario, run the navigator on it, print the
/// summary and write the trace, summary and plot.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Which demo (see `replay scenarios`).
    #[arg(default_value = DEFAULT_DEMO)]
    pub name: String,
    /// Seed (default: the scenario's own).
    #[arg(long)]
    pub seed: Option<u64>,
    /// Output folder.
    #[arg(long, value_name = "DIR", default_value = "out/demo")]
    pub out: PathBuf,
    /// Stop after this much simulated time, s (default: the scenario's
    /// duration).
    #[arg(long, value_name = "S")]
    pub max_time: Option<f64>,
}

/// Run the command.
///
/// # Errors
/// An unknown demo, a run that cannot be done, an output that cannot be
/// written.
pub fn exec(a: Args, out: &mut Out) -> Result<ExitCode, String> {
    let input = format!("demo:{}", a.name);
    let sim = build_sim(&input, a.seed).map_err(|e| e.to_string())?;
    let trace_path = a.out.join("trace.jsonl");
    let trace = create(&trace_path)?;
    let opts = LiveOptions {
        max_time_s: a.max_time,
        ..LiveOptions::default()
    };
    let (res, _) =
        run_live::<_, std::io::Sink>(&input, sim, trace, None, &opts).map_err(|e| e.to_string())?;
    out.text(replay::report::run_summary_text(&res.summary));
    let summary_path = a.out.join("summary.json");
    write_json(&summary_path, &res.summary)?;
    let svg_path = a.out.join("plot.svg");
    write_file(&svg_path, replay::plot::render_svg(&res.scene).as_bytes())?;
    out.line(format_args!(
        "wrote        {}, {}, {}",
        trace_path.display(),
        summary_path.display(),
        svg_path.display()
    ));
    Ok(ExitCode::SUCCESS)
}
