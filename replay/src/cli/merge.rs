//! `replay merge`: combine campaign shard results.

use super::out::{Out, create, finish};
use replay::campaign::{Shard, format_table, merge, read_results, summarise, write_results};
use replay::report::failures_text;
use std::path::PathBuf;
use std::process::ExitCode;

/// Combine campaign shard results exactly and print the summary table.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Shard results files, or folders whose `*.jsonl` files are all
    /// shard results.
    #[arg(required = true)]
    pub files: Vec<PathBuf>,
    /// Merged results file.
    #[arg(short = 'o', long = "out", value_name = "FILE")]
    pub out: Option<PathBuf>,
    /// Fail (exit 1) when any scenario reaches the source in fewer than
    /// this percentage of its runs.
    #[arg(long, value_name = "PERCENT", value_parser = super::check::percent)]
    pub min_success: Option<f64>,
}

/// Run the command.
///
/// # Errors
/// A shard file that cannot be read, shards that do not make one campaign
/// exactly, an output that cannot be written.
pub fn exec(a: Args, out: &mut Out) -> Result<ExitCode, String> {
    let mut files = Vec::new();
    for p in &a.files {
        if p.is_dir() {
            let mut inside: Vec<PathBuf> = std::fs::read_dir(p)
                .map_err(|e| format!("{}: {e}", p.display()))?
                .filter_map(|e| e.ok().map(|e| e.path()))
                .filter(|f| f.is_file() && f.extension().is_some_and(|x| x == "jsonl"))
                .collect();
            if inside.is_empty() {
                return Err(format!(
                    "{}: no *.jsonl shard files in this folder",
                    p.display()
                ));
            }
            // Sorted, so the order of the folder listing cannot matter.
            inside.sort();
            files.extend(inside);
        } else {
            files.push(p.clone());
        }
    }
    let mut shards = Vec::new();
    for f in &files {
        let file = std::fs::File::open(f).map_err(|e| format!("{}: {e}", f.display()))?;
        shards.push(read_results(
            std::io::BufReader::new(file),
            &f.display().to_string(),
        )?);
    }
    let (plan, results) = merge(shards)?;
    let summaries = summarise(&plan, &results);
    if plan.scenarios.iter().all(|s| s.starts_with("world:")) {
        out.text(replay::scorecard::report(&plan, &results, None));
    } else {
        out.text(format_table(&summaries));
        out.text(failures_text(&results, None));
    }
    if let Some(path) = a.out {
        let mut w = create(&path)?;
        write_results(&mut w, &plan, Shard::ALL, &results).map_err(|e| e.to_string())?;
        finish(w, &path)?;
    }
    Ok(super::campaign::success_verdict(
        &summaries,
        a.min_success,
        out,
        "merge",
    ))
}
