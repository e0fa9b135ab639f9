//! `replay campaign`: many seeds over one or more scenarios, in parallel.

use super::out::{Out, create, finish};
use replay::campaign::{CampaignPlan, Shard, format_table, run, summarise, write_results};
use replay::report::failures_text;
use std::path::PathBuf;
use std::process::ExitCode;

/// Many seeds over one or more scenarios, in parallel.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Scenario files or `demo:<name>` (repeatable).
    #[arg(long = "scenario", value_name = "SCENARIO", required = true)]
    pub scenarios: Vec<String>,
    /// Seeds per scenario.
    #[arg(long, default_value_t = 100)]
    pub seeds: u64,
    /// First seed.
    #[arg(long, default_value_t = 1)]
    pub first_seed: u64,
    /// Worker threads (0: one per core).
    #[arg(long, default_value_t = 0)]
    pub threads: usize,
    /// Run only shard i of n (0-based), e.g. `--shard 3/16`.
    #[arg(long, value_name = "I/N", value_parser = Shard::parse)]
    pub shard: Option<Shard>,
    /// Results file (JSON Lines; input to `merge`).
    #[arg(
        short = 'o',
        long = "out",
        value_name = "FILE",
        default_value = "out/campaign.jsonl"
    )]
    pub out: PathBuf,
    /// Stop each run after this much simulated time, s.
    #[arg(long, value_name = "S")]
    pub max_time: Option<f64>,
    /// No progress bar.
    #[arg(long)]
    pub quiet: bool,
}

/// Run the command.
///
/// # Errors
/// A thread pool or results file that cannot be made.
pub fn exec(a: Args, out: &mut Out) -> Result<ExitCode, String> {
    let shard = a.shard.unwrap_or(Shard::ALL);
    let plan = CampaignPlan {
        scenarios: a.scenarios,
        first_seed: a.first_seed,
        seeds: a.seeds,
    };
    let jobs = plan.jobs(shard).len() as u64;
    let bar = if a.quiet {
        indicatif::ProgressBar::hidden()
    } else {
        indicatif::ProgressBar::new(jobs)
    };
    bar.set_style(
        indicatif::ProgressStyle::with_template(
            "{bar:40} {pos}/{len} runs  {elapsed} elapsed, {eta} left",
        )
        .map_err(|e| e.to_string())?,
    );
    let started = std::time::Instant::now();
    let max_time = a.max_time;
    let results = run(
        &plan,
        shard,
        a.threads,
        |job| replay::run::campaign_job(job, max_time),
        || bar.inc(1),
    )?;
    bar.finish_and_clear();
    let mut w = create(&a.out)?;
    write_results(&mut w, &plan, shard, &results).map_err(|e| e.to_string())?;
    finish(w, &a.out)?;
    let wall = started.elapsed().as_secs_f64();
    if shard == Shard::ALL {
        out.text(format_table(&summarise(&plan, &results)));
        out.text(failures_text(&results, max_time));
    }
    out.line(format_args!(
        "{} runs in {wall:.1} s wall time; results in {}",
        results.len(),
        a.out.display()
    ));
    Ok(ExitCode::SUCCESS)
}
