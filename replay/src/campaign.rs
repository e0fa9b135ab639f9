//! Monte Carlo campaigns: many seeds over one or more scenarios.
//!
//! A campaign is a fixed, ordered list of jobs (scenario × seed). Jobs run
//! in parallel on a rayon pool, but every result is stored at its job's
//! index, so the results, and everything computed from them, do not depend
//! on the thread count or on scheduling.
//!
//! Sharding: `--shard i/n` keeps the jobs whose index is `i` modulo `n`
//! (0-based), so `n` array-job tasks of a cluster scheduler cover the
//! campaign exactly once between them. Each shard writes a results file;
//! [`merge`] combines shard files, checks that they describe the same
//! campaign, that no job is missing or repeated, and yields exactly the
//! results a single unsharded run gives.

use serde::{Deserialize, Serialize};
use std::io::{BufRead, Write};

/// Outcome of one job: one seed of one scenario.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, Default)]
pub struct SeedResult {
    /// Job index in the campaign's job list.
    pub job: u64,
    /// Scenario name.
    pub scenario: String,
    /// Seed.
    pub seed: u64,
    /// Whether the robot reached the source.
    pub reached: bool,
    /// Time to the source, s (when reached).
    pub time_to_source_s: Option<f64>,
    /// Wrong branches taken.
    pub wrong_branches: u32,
    /// Minimum true standoff from any wall, m.
    pub min_standoff_m: f64,
    /// Wall strikes.
    pub wall_strikes: u32,
    /// Time spent holding, s.
    pub held_s: f64,
    /// Digest of the decision trace.
    pub trace_digest: String,
    /// Why the run failed, when it did (an error, a timeout, a give-up).
    pub failure: Option<String>,
    /// Times the skin was pressed past its compliance (strikes too).
    #[serde(default)]
    pub skin_overpress: u32,
    /// Steps with some skin sensor touching a wall (fine).
    #[serde(default)]
    pub touch_steps: u64,
    /// Branch choices judged at junctions (policy-true).
    #[serde(default)]
    pub junction_calls: u32,
    /// Of those, the clear ones (flows differ by 20 % or more).
    #[serde(default)]
    pub clear_calls: u32,
    /// Clear calls that went wrong.
    #[serde(default)]
    pub wrong_clear_calls: u32,
    /// True path length over distance travelled, when reached (1 is the
    /// shortest possible).
    #[serde(default)]
    pub path_efficiency: Option<f64>,
    /// Whether a source is reachable (otherwise a safe hold is the right
    /// outcome).
    #[serde(default = "yes")]
    pub expect_reach: bool,
    /// The world's drawn parameters (generated worlds), `key=value ...`.
    #[serde(default)]
    pub parameters: String,
    /// The commands that rebuild and rerun this job by itself.
    #[serde(default)]
    pub rerun: String,
}

fn yes() -> bool {
    true
}

impl SeedResult {
    /// Whether the run did the right thing: reached the source where one
    /// is reachable, held without a strike where none is.
    #[must_use]
    pub fn succeeded(&self) -> bool {
        if self.expect_reach {
            self.reached
        } else {
            !self.reached && self.strike_free() && self.failure.as_deref() != Some("error")
        }
    }

    /// No strike of either kind.
    #[must_use]
    pub fn strike_free(&self) -> bool {
        self.wall_strikes == 0 && self.skin_overpress == 0
    }
}

/// Which part of the campaign this process runs.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct Shard {
    /// 0-based shard index.
    pub index: u64,
    /// Number of shards.
    pub count: u64,
}

impl Shard {
    /// The whole campaign.
    pub const ALL: Self = Self { index: 0, count: 1 };

    /// Parse `i/n` (0-based `i < n`).
    ///
    /// # Errors
    /// A message saying what is wrong with the text.
    pub fn parse(text: &str) -> Result<Self, String> {
        let (i, n) = text
            .split_once('/')
            .ok_or_else(|| format!("shard '{text}': expected i/n, e.g. 0/4"))?;
        let index: u64 = i
            .trim()
            .parse()
            .map_err(|_| format!("shard '{text}': '{i}' is not a whole number"))?;
        let count: u64 = n
            .trim()
            .parse()
            .map_err(|_| format!("shard '{text}': '{n}' is not a whole number"))?;
        if count == 0 || index >= count {
            return Err(format!(
                "shard '{text}': need 0 <= i < n (shards are numbered from 0)"
            ));
        }
        Ok(Self { index, count })
    }

    fn keeps(self, job: u64) -> bool {
        job % self.count == self.index
    }
}

/// What a campaign covers.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CampaignPlan {
    /// Scenario names, in order.
    pub scenarios: Vec<String>,
    /// First seed.
    pub first_seed: u64,
    /// Seeds per scenario.
    pub seeds: u64,
}

/// One job of a plan.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Job {
    /// Index in the plan's job list.
    pub index: u64,
    /// Scenario name.
    pub scenario: String,
    /// Seed.
    pub seed: u64,
}

impl CampaignPlan {
    /// Number of jobs in the whole campaign.
    #[must_use]
    pub fn job_count(&self) -> u64 {
        self.seeds.saturating_mul(self.scenarios.len() as u64)
    }

    /// The jobs of one shard, in job order: scenario-major, then seed.
    #[must_use]
    pub fn jobs(&self, shard: Shard) -> Vec<Job> {
        let mut out = Vec::new();
        let mut index = 0u64;
        for s in &self.scenarios {
            for k in 0..self.seeds {
                if shard.keeps(index) {
                    out.push(Job {
                        index,
                        scenario: s.clone(),
                        seed: self.first_seed.wrapping_add(k),
                    });
                }
                index += 1;
            }
        }
        out
    }
}

/// Run the jobs of `shard` on `threads` worker threads (0: rayon's
/// default). `run_one` must be a pure function of its job. `progress` is
/// called once per finished job, from worker threads.
///
/// # Errors
/// When the thread pool cannot be built.
pub fn run<F, P>(
    plan: &CampaignPlan,
    shard: Shard,
    threads: usize,
    run_one: F,
    progress: P,
) -> Result<Vec<SeedResult>, String>
where
    F: Fn(&Job) -> SeedResult + Sync,
    P: Fn() + Sync,
{
    use rayon::prelude::*;
    let jobs = plan.jobs(shard);
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .map_err(|e| format!("thread pool: {e}"))?;
    // `collect` on an indexed parallel iterator keeps job order.
    let results: Vec<SeedResult> = pool.install(|| {
        jobs.par_iter()
            .map(|j| {
                let r = run_one(j);
                progress();
                r
            })
            .collect()
    });
    Ok(results)
}

/// Header line of a shard results file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ShardHeader {
    /// File kind marker.
    pub upcurrent_campaign_results: u32,
    /// The plan.
    pub plan: CampaignPlan,
    /// Which shard.
    pub shard: Shard,
}

/// Write a shard's results: a header line, then one JSON line per job.
///
/// # Errors
/// I/O errors.
pub fn write_results<W: Write>(
    mut w: W,
    plan: &CampaignPlan,
    shard: Shard,
    results: &[SeedResult],
) -> std::io::Result<()> {
    let header = ShardHeader {
        upcurrent_campaign_results: 1,
        plan: plan.clone(),
        shard,
    };
    serde_json::to_writer(&mut w, &header)?;
    w.write_all(b"\n")?;
    for r in results {
        serde_json::to_writer(&mut w, r)?;
        w.write_all(b"\n")?;
    }
    Ok(())
}

/// Read a shard results file.
///
/// # Errors
/// A message naming the file and line at fault.
pub fn read_results<R: BufRead>(
    r: R,
    name: &str,
) -> Result<(ShardHeader, Vec<SeedResult>), String> {
    let mut lines = r.lines();
    let first = lines
        .next()
        .ok_or_else(|| format!("{name}: empty file"))?
        .map_err(|e| format!("{name}: line 1: {e}"))?;
    let header: ShardHeader = serde_json::from_str(&first)
        .map_err(|e| format!("{name}: line 1: not a campaign results header: {e}"))?;
    let mut out = Vec::new();
    for (i, line) in lines.enumerate() {
        let line = line.map_err(|e| format!("{name}: line {}: {e}", i + 2))?;
        if line.trim().is_empty() {
            continue;
        }
        let r: SeedResult =
            serde_json::from_str(&line).map_err(|e| format!("{name}: line {}: {e}", i + 2))?;
        out.push(r);
    }
    Ok((header, out))
}

/// Combine shard results into the whole campaign's results, in job order.
///
/// # Errors
/// When the shards disagree on the plan, a job is missing or appears twice,
/// or a result does not belong to the plan.
pub fn merge(
    shards: Vec<(ShardHeader, Vec<SeedResult>)>,
) -> Result<(CampaignPlan, Vec<SeedResult>), String> {
    let mut it = shards.into_iter();
    let (first, mut all) = it.next().ok_or("no shard files given")?;
    for (h, rs) in it {
        if h.plan != first.plan {
            return Err(format!(
                "shard {}/{} has a different plan from shard {}/{}",
                h.shard.index, h.shard.count, first.shard.index, first.shard.count
            ));
        }
        all.extend(rs);
    }
    let plan = first.plan;
    let n = plan.job_count();
    all.sort_by_key(|r| r.job);
    let mut expected = plan.jobs(Shard::ALL).into_iter();
    let mut seen = 0u64;
    for r in &all {
        let Some(job) = expected.next() else {
            return Err(format!("job {} is beyond the plan's {n} jobs", r.job));
        };
        if r.job != job.index {
            return Err(if r.job < job.index {
                format!("job {} appears twice", r.job)
            } else {
                format!(
                    "job {} ({} seed {}) is missing",
                    job.index, job.scenario, job.seed
                )
            });
        }
        if r.scenario != job.scenario || r.seed != job.seed {
            return Err(format!(
                "job {} is {} seed {} in the results but {} seed {} in the plan",
                r.job, r.scenario, r.seed, job.scenario, job.seed
            ));
        }
        seen += 1;
    }
    if seen != n {
        let missing = plan
            .jobs(Shard::ALL)
            .into_iter()
            .nth(usize::try_from(seen).unwrap_or(usize::MAX))
            .map_or(String::new(), |j| {
                format!(" (first: job {} {} seed {})", j.index, j.scenario, j.seed)
            });
        return Err(format!("{} of {n} jobs missing{missing}", n - seen));
    }
    Ok((plan, all))
}

/// Nearest-rank percentile (`p` in [0, 100]) of sorted values.
#[must_use]
pub fn percentile(sorted: &[f64], p: f64) -> Option<f64> {
    if sorted.is_empty() {
        return None;
    }
    let n = sorted.len();
    let rank = libm::ceil(p / 100.0 * n as f64).max(1.0);
    let idx = (rank as usize).min(n) - 1;
    sorted.get(idx).copied()
}

/// Per-scenario summary of a campaign.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ScenarioSummary {
    /// Scenario name.
    pub scenario: String,
    /// Runs.
    pub runs: u64,
    /// Fraction of runs that reached the source.
    pub success_rate: f64,
    /// Fraction of runs that took at least one wrong branch.
    pub wrong_branch_rate: f64,
    /// Minimum standoff percentiles (5th, 50th, 95th), m.
    pub standoff_p5_p50_p95_m: [f64; 3],
    /// Time to source percentiles over successful runs (50th, 95th), s.
    pub time_to_source_p50_p95_s: Option<[f64; 2]>,
    /// Runs with at least one wall strike.
    pub runs_with_strikes: u64,
    /// Failing seeds.
    pub failing_seeds: Vec<u64>,
}

/// Summarise results per scenario, in plan order.
#[must_use]
pub fn summarise(plan: &CampaignPlan, results: &[SeedResult]) -> Vec<ScenarioSummary> {
    plan.scenarios
        .iter()
        .map(|s| {
            let rs: Vec<&SeedResult> = results.iter().filter(|r| &r.scenario == s).collect();
            let n = rs.len() as u64;
            let frac = |k: usize| if n == 0 { 0.0 } else { k as f64 / n as f64 };
            let mut standoff: Vec<f64> = rs.iter().map(|r| r.min_standoff_m).collect();
            standoff.sort_by(f64::total_cmp);
            let mut times: Vec<f64> = rs.iter().filter_map(|r| r.time_to_source_s).collect();
            times.sort_by(f64::total_cmp);
            let pct = |v: &[f64], p| percentile(v, p).unwrap_or(f64::NAN);
            ScenarioSummary {
                scenario: s.clone(),
                runs: n,
                success_rate: frac(rs.iter().filter(|r| r.reached).count()),
                wrong_branch_rate: frac(rs.iter().filter(|r| r.wrong_branches > 0).count()),
                standoff_p5_p50_p95_m: [
                    pct(&standoff, 5.0),
                    pct(&standoff, 50.0),
                    pct(&standoff, 95.0),
                ],
                time_to_source_p50_p95_s: if times.is_empty() {
                    None
                } else {
                    Some([pct(&times, 50.0), pct(&times, 95.0)])
                },
                runs_with_strikes: rs.iter().filter(|r| r.wall_strikes > 0).count() as u64,
                failing_seeds: rs
                    .iter()
                    .filter(|r| !r.reached || r.wall_strikes > 0)
                    .map(|r| r.seed)
                    .collect(),
            }
        })
        .collect()
}

/// The summary as a plain-text table.
#[must_use]
pub fn format_table(summaries: &[ScenarioSummary]) -> String {
    use std::fmt::Write as _;
    let mut out = String::new();
    let _ = writeln!(
        out,
        "{:<22} {:>6} {:>8} {:>8} {:>28} {:>20} {:>8}",
        "scenario",
        "runs",
        "success",
        "wrong",
        "standoff p5/p50/p95 (m)",
        "to source p50/p95 (s)",
        "strikes"
    );
    for s in summaries {
        let t = s
            .time_to_source_p50_p95_s
            .map_or("-".to_string(), |[a, b]| format!("{a:.1}/{b:.1}"));
        let [a, b, c] = s.standoff_p5_p50_p95_m;
        let _ = writeln!(
            out,
            "{:<22} {:>6} {:>7.1}% {:>7.1}% {:>28} {:>20} {:>8}",
            s.scenario,
            s.runs,
            100.0 * s.success_rate,
            100.0 * s.wrong_branch_rate,
            format!("{a:.3}/{b:.3}/{c:.3}"),
            t,
            s.runs_with_strikes
        );
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn plan() -> CampaignPlan {
        CampaignPlan {
            scenarios: vec!["a".into(), "b".into()],
            first_seed: 10,
            seeds: 7,
        }
    }

    /// A stand-in job: a pure function of the seed.
    fn fake(j: &Job) -> SeedResult {
        SeedResult {
            job: j.index,
            scenario: j.scenario.clone(),
            seed: j.seed,
            reached: !j.seed.is_multiple_of(3),
            time_to_source_s: (!j.seed.is_multiple_of(3)).then_some(j.seed as f64 * 1.5),
            wrong_branches: u32::from(j.seed.is_multiple_of(5)),
            min_standoff_m: 0.1 + (j.seed % 7) as f64 * 0.01,
            wall_strikes: 0,
            held_s: 0.0,
            trace_digest: format!("{:016x}", j.seed.wrapping_mul(0x9e37_79b9_7f4a_7c15)),
            failure: None,
            ..SeedResult::default()
        }
    }

    #[test]
    fn shards_partition_the_jobs() {
        let p = plan();
        let all: Vec<u64> = p.jobs(Shard::ALL).iter().map(|j| j.index).collect();
        assert_eq!(all, (0..14).collect::<Vec<_>>());
        let mut union: Vec<u64> = (0..3)
            .flat_map(|i| p.jobs(Shard { index: i, count: 3 }))
            .map(|j| j.index)
            .collect();
        union.sort_unstable();
        assert_eq!(union, all);
    }

    #[test]
    fn results_do_not_depend_on_threads() {
        let p = plan();
        let one = run(&p, Shard::ALL, 1, fake, || {}).unwrap();
        let two = run(&p, Shard::ALL, 2, fake, || {}).unwrap();
        let four = run(&p, Shard::ALL, 4, fake, || {}).unwrap();
        assert_eq!(one, two);
        assert_eq!(one, four);
    }

    #[test]
    fn merged_shards_equal_one_run() {
        let p = plan();
        let whole = run(&p, Shard::ALL, 2, fake, || {}).unwrap();
        let mut files = Vec::new();
        for i in (0..3).rev() {
            let s = Shard { index: i, count: 3 };
            let rs = run(&p, s, 1, fake, || {}).unwrap();
            let mut buf = Vec::new();
            write_results(&mut buf, &p, s, &rs).unwrap();
            files.push(read_results(buf.as_slice(), "mem").unwrap());
        }
        let (mp, merged) = merge(files).unwrap();
        assert_eq!(mp, p);
        assert_eq!(merged, whole);
        assert_eq!(summarise(&p, &merged), summarise(&p, &whole));
    }

    #[test]
    fn merge_reports_missing_and_duplicate_jobs() {
        let p = plan();
        let s0 = Shard { index: 0, count: 2 };
        let r0 = run(&p, s0, 1, fake, || {}).unwrap();
        let e = merge(vec![(
            ShardHeader {
                upcurrent_campaign_results: 1,
                plan: p.clone(),
                shard: s0,
            },
            r0.clone(),
        )])
        .unwrap_err();
        assert!(e.contains("missing"), "{e}");
        let e = merge(vec![
            (
                ShardHeader {
                    upcurrent_campaign_results: 1,
                    plan: p.clone(),
                    shard: s0,
                },
                r0.clone(),
            ),
            (
                ShardHeader {
                    upcurrent_campaign_results: 1,
                    plan: p.clone(),
                    shard: s0,
                },
                r0,
            ),
        ])
        .unwrap_err();
        assert!(e.contains("twice"), "{e}");
    }

    #[test]
    fn shard_parse() {
        assert_eq!(Shard::parse("2/5").unwrap(), Shard { index: 2, count: 5 });
        assert!(Shard::parse("5/5").is_err());
        assert!(Shard::parse("0/0").is_err());
        assert!(Shard::parse("x/2").is_err());
        assert!(Shard::parse("3").is_err());
    }

    #[test]
    fn nearest_rank_percentiles() {
        // Nearest-rank definition (e.g. NIST/SEMATECH e-Handbook's list of
        // percentile definitions): rank = ceil(p/100 * n).
        let v = [15.0, 20.0, 35.0, 40.0, 50.0];
        assert_eq!(percentile(&v, 5.0), Some(15.0));
        assert_eq!(percentile(&v, 30.0), Some(20.0));
        assert_eq!(percentile(&v, 40.0), Some(20.0));
        assert_eq!(percentile(&v, 50.0), Some(35.0));
        assert_eq!(percentile(&v, 100.0), Some(50.0));
        assert_eq!(percentile(&[], 50.0), None);
    }

    #[test]
    fn summary_counts() {
        let p = plan();
        let rs = run(&p, Shard::ALL, 1, fake, || {}).unwrap();
        let s = summarise(&p, &rs);
        assert_eq!(s.len(), 2);
        // Seeds 10..16: multiples of 3 are 12 and 15 -> 5 of 7 reach.
        assert!((s[0].success_rate - 5.0 / 7.0).abs() < 1e-12);
        assert_eq!(s[0].failing_seeds, vec![12, 15]);
        // Multiples of 5: 10 and 15.
        assert!((s[0].wrong_branch_rate - 2.0 / 7.0).abs() < 1e-12);
        assert!(format_table(&s).contains("71.4%"));
    }
}
