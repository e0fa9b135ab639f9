//! `replay scorecard`: generated worlds of every family through the
//! navigator, one row per family (a campaign over `world:` scenarios).

use super::campaign::{ShardArg, resolve_shard, run_and_write, shard_arg};
use super::out::Out;
use replay::campaign::{CampaignPlan, Shard};
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
    /// Run only shard i of n (0-based), e.g. `--shard 3/16`; or `--shard
    /// env`: i and n from a Slurm job array or a Kubernetes indexed job.
    #[arg(long, value_name = "I/N|env", value_parser = shard_arg)]
    pub shard: Option<ShardArg>,
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
    let shard = resolve_shard(a.shard, "scorecard", out)?;
    let plan = CampaignPlan {
        scenarios,
        first_seed: a.first_seed,
        seeds: a.worlds,
    };
    let max_time = a.max_time;
    let (results, wall) =
        run_and_write(&plan, shard, a.threads, max_time, a.quiet, "worlds", &a.out)?;
    if shard == Shard::ALL {
        out.text(replay::scorecard::report(&plan, &results, max_time));
    }
    out.line(format_args!(
        "{} worlds in {wall:.1} s wall time; results in {}",
        results.len(),
        a.out.display()
    ));
    Ok(ExitCode::SUCCESS)
}
