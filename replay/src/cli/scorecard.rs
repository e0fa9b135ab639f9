//! `replay scorecard`: generated worlds of every family through the
//! navigator, one row per family (a campaign over `world:` scenarios).

use super::out::{Out, create, finish};
use replay::campaign::{CampaignPlan, Shard, run, write_results};
use replay::sim::worlds::{Family, WorldSpec};
use std::path::PathBuf;
use std::process::ExitCode;

/// Run generated worlds of every family (or those named) through the
/// navigator and print one row per family.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Families (repeatable; default all). A family may carry fixed
    /// parameters, `--family fork,ratio=1.5`.
    #[arg(long = "family", value_name = "FAMILY")]
    pub families: Vec<String>,
    /// Worlds per family.
    #[arg(long, default_value_t = 20)]
    pub worlds: u64,
    /// First world seed.
    #[arg(long, default_value_t = 1)]
    pub first_seed: u64,
    /// Worker threads (0: one per core).
    #[arg(long, default_value_t = 0)]
    pub threads: usize,
    /// Run only shard i of n (0-based), e.g. `--shard 3/16`.
    #[arg(long, value_name = "I/N", value_parser = Shard::parse)]
    pub shard: Option<Shard>,
    /// Results file (JSON Lines; `merge` combines shards).
    #[arg(
        short = 'o',
        long = "out",
        value_name = "FILE",
        default_value = "out/scorecard.jsonl"
    )]
    pub out: PathBuf,
    /// Stop each run after this much simulated time, s (default: each
    /// world's own duration).
    #[arg(long, value_name = "S")]
    pub max_time: Option<f64>,
    /// No progress bar.
    #[arg(long)]
    pub quiet: bool,
}

/// Run the command.
///
/// # Errors
/// No worlds asked for, an unknown family or parameter, a thread pool or
/// results file that cannot be made.
pub fn exec(a: Args, out: &mut Out) -> Result<ExitCode, String> {
    if a.worlds == 0 {
        return Err("--worlds 0: nothing to run".into());
    }
    let names: Vec<String> = if a.families.is_empty() {
        Family::ALL.iter().map(|f| f.name().to_string()).collect()
    } else {
        a.families.clone()
    };
    let mut scenarios = Vec::with_capacity(names.len());
    for n in &names {
        let spec = WorldSpec::parse(n).map_err(|e| e.to_string())?;
        scenarios.push(format!("world:{}", spec.text()));
    }
    let shard = a.shard.unwrap_or(Shard::ALL);
    let plan = CampaignPlan {
        scenarios,
        first_seed: a.first_seed,
        seeds: a.worlds,
    };
    let jobs = plan.jobs(shard).len() as u64;
    let bar = if a.quiet {
        indicatif::ProgressBar::hidden()
    } else {
        indicatif::ProgressBar::new(jobs)
    };
    bar.set_style(
        indicatif::ProgressStyle::with_template(
            "{bar:40} {pos}/{len} worlds  {elapsed} elapsed, {eta} left",
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
    if shard == Shard::ALL {
        out.text(replay::scorecard::report(&plan, &results, max_time));
    }
    out.line(format_args!(
        "{} worlds in {:.1} s wall time; results in {}",
        results.len(),
        started.elapsed().as_secs_f64(),
        a.out.display()
    ));
    Ok(ExitCode::SUCCESS)
}
