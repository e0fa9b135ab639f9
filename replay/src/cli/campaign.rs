//! `replay campaign`: many seeds over one or more scenarios, in parallel.

use super::out::{Out, create, finish};
use replay::campaign::{
    CampaignPlan, ScenarioSummary, Shard, below_success, format_table, run, summarise,
    write_results,
};
use replay::report::failures_text;
use std::path::PathBuf;
use std::process::ExitCode;

/// Many seeds over one or more scenarios, in parallel. Exit 0 when every
/// run was done (and, with `--min-success`, every scenario met it), 1 when
/// a scenario's success rate is below `--min-success`, 2 on error.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Scenario files or `demo:<name>` (repeatable).
    #[arg(long = "scenario", value_name = "SCENARIO", required = true)]
    pub scenarios: Vec<String>,
    /// Seeds per scenario (at least 1).
    #[arg(long, default_value_t = 100, value_parser = clap::value_parser!(u64).range(1..))]
    pub seeds: u64,
    /// First seed.
    #[arg(long, default_value_t = 1)]
    pub first_seed: u64,
    /// Worker threads (0: one per core).
    #[arg(long, default_value_t = 0)]
    pub threads: usize,
    /// Run only shard i of n (0-based), e.g. `--shard 3/16`; or `--shard
    /// env`: i and n from a Slurm job array or a Kubernetes indexed job
    /// (example job files in `replay/jobs/`).
    #[arg(long, value_name = "I/N|env", value_parser = shard_arg)]
    pub shard: Option<ShardArg>,
    /// Results file (JSON Lines; input to `merge`).
    #[arg(
        short = 'o',
        long = "out",
        value_name = "FILE",
        default_value = "out/campaign.jsonl"
    )]
    pub out: PathBuf,
    /// Stop each run after this much simulated time, s.
    #[arg(long, value_name = "S", value_parser = super::check::time_limit_s)]
    pub max_time: Option<f64>,
    /// Fail (exit 1) when any scenario reaches the source in fewer than
    /// this percentage of its runs (of this shard's runs, when sharded).
    #[arg(long, value_name = "PERCENT", value_parser = super::check::percent)]
    pub min_success: Option<f64>,
    /// No progress bar.
    #[arg(long)]
    pub quiet: bool,
}

/// A shard given on the command line, or to be read from the scheduler.
#[derive(Debug, Clone, Copy)]
pub enum ShardArg {
    /// `i/n`.
    Fixed(Shard),
    /// `env`.
    FromEnv,
}

/// Parse `--shard`: `i/n` or `env`.
///
/// # Errors
/// A message saying what is wrong with the text.
pub fn shard_arg(text: &str) -> Result<ShardArg, String> {
    if text == "env" {
        Ok(ShardArg::FromEnv)
    } else {
        Shard::parse(text).map(ShardArg::Fixed)
    }
}

/// Run the command.
///
/// # Errors
/// A scenario that cannot be loaded (checked before any run), a thread
/// pool or results file that cannot be made.
pub fn exec(a: Args, out: &mut Out) -> Result<ExitCode, String> {
    for s in &a.scenarios {
        replay::run::build_sim(s, None).map_err(|e| format!("scenario {s}: {e}"))?;
    }
    let shard = resolve_shard(a.shard, "campaign", out)?;
    let plan = CampaignPlan {
        scenarios: a.scenarios,
        first_seed: a.first_seed,
        seeds: a.seeds,
    };
    let max_time = a.max_time;
    let (results, wall) =
        run_and_write(&plan, shard, a.threads, max_time, a.quiet, "runs", &a.out)?;
    let summaries = summarise(&plan, &results);
    if shard == Shard::ALL {
        out.text(format_table(&summaries));
        out.text(failures_text(&results, max_time));
    }
    out.line(format_args!(
        "{} runs in {wall:.1} s wall time; results in {}",
        results.len(),
        a.out.display()
    ));
    Ok(success_verdict(&summaries, a.min_success, out, "campaign"))
}

/// The shard a `--shard` argument names; `env` reads the scheduler's
/// variables and says where it found them.
///
/// # Errors
/// `--shard env` without a scheduler's variables, or with bad ones.
pub fn resolve_shard(arg: Option<ShardArg>, command: &str, out: &mut Out) -> Result<Shard, String> {
    Ok(match arg {
        None => Shard::ALL,
        Some(ShardArg::Fixed(s)) => s,
        Some(ShardArg::FromEnv) => {
            let (s, from) = Shard::from_env(|k| std::env::var(k).ok())
                .map_err(|e| format!("--shard env: {e}"))?;
            out.note(
                command,
                format_args!("shard {}/{} from the {from}", s.index, s.count),
            );
            s
        }
    })
}

/// Run the jobs of `shard` in parallel behind a progress bar (none when
/// `quiet`; `noun` names the jobs on it) and write the results file; the
/// results in job order and the wall time, s.
///
/// # Errors
/// A thread pool or results file that cannot be made.
pub fn run_and_write(
    plan: &CampaignPlan,
    shard: Shard,
    threads: usize,
    max_time_s: Option<f64>,
    quiet: bool,
    noun: &str,
    path: &std::path::Path,
) -> Result<(Vec<replay::campaign::SeedResult>, f64), String> {
    let jobs = plan.jobs(shard).len() as u64;
    let bar = if quiet {
        indicatif::ProgressBar::hidden()
    } else {
        indicatif::ProgressBar::new(jobs)
    };
    bar.set_style(
        indicatif::ProgressStyle::with_template(&format!(
            "{{bar:40}} {{pos}}/{{len}} {noun}  {{elapsed}} elapsed, {{eta}} left"
        ))
        .map_err(|e| e.to_string())?,
    );
    let started = std::time::Instant::now();
    let results = run(
        plan,
        shard,
        threads,
        |job| replay::run::campaign_job(job, max_time_s),
        || bar.inc(1),
    )?;
    bar.finish_and_clear();
    let mut w = create(path)?;
    write_results(&mut w, plan, shard, &results).map_err(|e| e.to_string())?;
    finish(w, path)?;
    Ok((results, started.elapsed().as_secs_f64()))
}

/// Exit 1, saying which scenarios, when a success rate is below
/// `min_percent`; else 0.
pub fn success_verdict(
    summaries: &[ScenarioSummary],
    min_percent: Option<f64>,
    out: &mut Out,
    command: &str,
) -> ExitCode {
    let Some(min) = min_percent else {
        return ExitCode::SUCCESS;
    };
    let low = below_success(summaries, min / 100.0);
    for (scenario, rate) in &low {
        out.note(
            command,
            format_args!(
                "{scenario}: success {:.1}% is below the required {min}%",
                100.0 * rate
            ),
        );
    }
    ExitCode::from(u8::from(!low.is_empty()))
}
