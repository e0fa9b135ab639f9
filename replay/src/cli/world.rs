//! `replay world` and `replay worlds`: generated worlds.

use super::out::{Out, write_file};
use replay::sim::worlds::{COMMON_KEYS, Family, WorldSpec, generate};
use std::path::PathBuf;
use std::process::ExitCode;

/// Generate a world of a family from a seed and write it as a scenario
/// file (to standard output without `-o`).
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The family, optionally with fixed parameters: `fork` or
    /// `fork,ratio=2.5,branches=3` (`replay worlds` lists them).
    pub family: String,
    /// World seed: the same family, seed and parameters give the same
    /// world.
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
    /// Scenario file to write.
    #[arg(short = 'o', long = "out", value_name = "FILE")]
    pub out: Option<PathBuf>,
}

/// Run the command: generate, write, and say what was drawn (on standard
/// error when the file goes to standard output).
///
/// # Errors
/// An unknown family or parameter, a family and seed with no valid world,
/// a file that cannot be written.
pub fn exec(a: &Args, out: &mut Out) -> Result<ExitCode, String> {
    let spec = WorldSpec::parse(&a.family).map_err(|e| e.to_string())?;
    let (world, sim) = generate(&spec, a.seed).map_err(|e| e.to_string())?;
    let about = format!(
        "{}: {}; true path {:.1} m; drawn {}",
        world.scenario.name,
        world.scenario.description,
        sim.true_path().map_or(f64::NAN, |p| p.length_m),
        world.parameter_text()
    );
    match &a.out {
        Some(path) => {
            write_file(path, world.toml.as_bytes())?;
            out.line(about);
            out.line(format_args!("wrote {}", path.display()));
        }
        None => {
            out.text(&world.toml);
            out.note("world", about);
        }
    }
    Ok(ExitCode::SUCCESS)
}

/// `replay worlds`: every family, what it is and what it draws.
pub fn list(out: &mut Out) -> ExitCode {
    for f in Family::ALL {
        out.line(format_args!("world:{:<17} {}", f.name(), f.summary()));
        out.line(format_args!("{:<23} draws {}", "", f.keys().join(", ")));
    }
    out.line(format_args!(
        "every family also draws {}",
        COMMON_KEYS.join(", ")
    ));
    ExitCode::SUCCESS
}
