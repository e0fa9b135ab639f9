//! `replay inspect`: summarise a log.

use super::out::Out;
use replay::log::{ReadOptions, inspect};
use std::path::PathBuf;
use std::process::ExitCode;

/// Summarise a log: header, record counts, time span and gaps, sensor
/// health, damage. Exit 0 if undamaged, 1 if damaged, 2 if unreadable.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The log file.
    pub log: PathBuf,
    /// Print the report as JSON.
    #[arg(long)]
    pub json: bool,
    /// Largest record accepted, bytes (longer ones are damage).
    #[arg(long, value_name = "BYTES", default_value_t = 1 << 20)]
    pub max_record: u32,
}

/// Run the command.
///
/// # Errors
/// A message naming the log when it cannot be opened or its header is
/// unusable.
pub fn exec(a: Args, out: &mut Out) -> Result<ExitCode, String> {
    let file = std::fs::File::open(&a.log).map_err(|e| format!("{}: {e}", a.log.display()))?;
    let opts = ReadOptions {
        max_record_bytes: a.max_record,
        ..ReadOptions::salvage()
    };
    let report = inspect(std::io::BufReader::new(file), opts)
        .map_err(|e| format!("{}: {e}", a.log.display()))?;
    if a.json {
        out.json(&report)?;
    } else {
        out.text(&report);
    }
    Ok(ExitCode::from(if report.is_clean() { 0 } else { 1 }))
}
