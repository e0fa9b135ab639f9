//! `replay plot`: draw a run as SVG.

use super::out::{Out, write_file};
use replay::run::{LiveOptions, build_sim, run_live, scene_of_log};
use std::path::PathBuf;
use std::process::ExitCode;

/// Draw a run as SVG: top and side views and a time strip. A scenario or
/// demo is simulated (true walls, true path); a log is replayed through the
/// navigator (odometry path, what it felt and decided; no true walls).
#[derive(Debug, clap::Args)]
pub struct Args {
    /// A scenario file, `demo:<name>`, a log file, or a decision trace
    /// (`.jsonl`: drawn as its time strip).
    pub input: String,
    /// Seed (default: the scenario's own; refused for a log).
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
    /// Stop after this much simulated time, s (refused for a log).
    #[arg(long, value_name = "S", value_parser = super::check::time_limit_s)]
    pub max_time: Option<f64>,
    /// Read a damaged log, skipping damaged records (a log only).
    #[arg(long)]
    pub salvage: bool,
}

/// Run the command.
///
/// # Errors
/// An input that cannot be loaded or run, an option that has no effect on
/// it, an SVG that cannot be written.
pub fn exec(a: Args, out: &mut Out) -> Result<ExitCode, String> {
    let input = &a.input;
    if input.ends_with(".jsonl") {
        if a.seed.is_some() || a.max_time.is_some() || a.salvage {
            return Err(format!(
                "{input} is a decision trace: --seed, --max-time and --salvage have no effect on it"
            ));
        }
        let f = std::fs::File::open(input).map_err(|e| format!("{input}: {e}"))?;
        let scene = replay::plot::scene_of_trace(std::io::BufReader::new(f), input, 25)?;
        write_file(&a.out, replay::plot::render_svg(&scene).as_bytes())?;
        out.line(format_args!(
            "{input}: {} steps drawn as a time strip; wrote {}",
            scene.timeline.len(),
            a.out.display()
        ));
        return Ok(ExitCode::SUCCESS);
    }
    let (summary, scene) = if super::run::is_log(input) {
        if a.seed.is_some() || a.max_time.is_some() {
            return Err(format!(
                "{input} is a log: --seed and --max-time have no effect on recorded frames"
            ));
        }
        let f = std::fs::File::open(input).map_err(|e| format!("{input}: {e}"))?;
        scene_of_log(
            input,
            std::io::BufReader::with_capacity(1 << 16, f),
            a.salvage,
            25,
        )
        .map_err(|e| format!("{input}: {e}"))?
    } else {
        if a.salvage {
            return Err(format!(
                "{input} is a scenario: --salvage reads damaged logs only"
            ));
        }
        let sim = build_sim(input, a.seed).map_err(|e| e.to_string())?;
        let opts = LiveOptions {
            max_time_s: a.max_time,
            ..LiveOptions::default()
        };
        let (res, _) = run_live::<_, std::io::Sink>(input, sim, std::io::sink(), None, &opts)
            .map_err(|e| e.to_string())?;
        (res.summary, res.scene)
    };
    write_file(&a.out, replay::plot::render_svg(&scene).as_bytes())?;
    out.line(format_args!(
        "{input}: {}; wrote {}",
        summary.outcome,
        a.out.display()
    ));
    Ok(ExitCode::SUCCESS)
}
