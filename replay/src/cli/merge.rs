//! `replay merge`: combine campaign shard results.

use super::out::{Out, create, finish};
use replay::campaign::{Shard, format_table, merge, read_results, summarise, write_results};
use replay::report::failures_text;
use std::path::PathBuf;
use std::process::ExitCode;

/// Combine campaign shard results exactly and print the summary table.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Shard results files.
    #[arg(required = true)]
    pub files: Vec<PathBuf>,
    /// Merged results file.
    #[arg(short = 'o', long = "out", value_name = "FILE")]
    pub out: Option<PathBuf>,
}

/// Run the command.
///
/// # Errors
/// A shard file that cannot be read, shards that do not make one campaign
/// exactly, an output that cannot be written.
pub fn exec(a: Args, out: &mut Out) -> Result<ExitCode, String> {
    let mut shards = Vec::new();
    for f in &a.files {
        let file = std::fs::File::open(f).map_err(|e| format!("{}: {e}", f.display()))?;
        shards.push(read_results(
            std::io::BufReader::new(file),
            &f.display().to_string(),
        )?);
    }
    let (plan, results) = merge(shards)?;
    if plan.scenarios.iter().all(|s| s.starts_with("world:")) {
        out.text(replay::scorecard::report(&plan, &results, None));
    } else {
        out.text(format_table(&summarise(&plan, &results)));
        out.text(failures_text(&results, None));
    }
    if let Some(path) = a.out {
        let mut w = create(&path)?;
        write_results(&mut w, &plan, Shard::ALL, &results).map_err(|e| e.to_string())?;
        finish(w, &path)?;
    }
    Ok(ExitCode::SUCCESS)
}
