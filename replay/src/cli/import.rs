//! `replay import`: a CSV rig log to a log.

use super::out::Out;
use replay::import::import_files;
use std::path::PathBuf;
use std::process::ExitCode;

/// Turn a CSV rig log into a log, through a mapping file.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The CSV rig log.
    pub csv: PathBuf,
    /// The mapping file (TOML; see `replay::import` or LOGFORMAT.md).
    #[arg(long, value_name = "TOML")]
    pub map: PathBuf,
    /// The log to write.
    #[arg(short = 'o', long = "out", value_name = "LOG")]
    pub out: PathBuf,
}

/// Run the command.
///
/// # Errors
/// The import's error, naming the file, row and column at fault.
pub fn exec(a: Args, out: &mut Out) -> Result<ExitCode, String> {
    let sum = import_files(&a.csv, &a.map, &a.out).map_err(|e| e.to_string())?;
    out.line(format_args!(
        "imported {} rows: {} frames, {} notes, {} contacts, {} bytes -> {}",
        sum.rows,
        sum.frames,
        sum.notes,
        sum.contacts,
        sum.bytes,
        a.out.display()
    ));
    out.line(format_args!(
        "missing: ports in {} rows ({} single port cells as NaN), pose in {} rows, joints in {} rows",
        sum.rows_without_ports,
        sum.missing_port_cells,
        sum.rows_without_pose,
        sum.rows_without_joints
    ));
    Ok(ExitCode::SUCCESS)
}
