//! The replay tool's determinism: a live run and the replay of the log it
//! wrote agree byte for byte; a campaign's results do not depend on the
//! thread count or on sharding; a fixed short run has the digest committed
//! here.
//!
//! Update rule for [`WRENS_11_3S_DIGEST`] (as in `determinism.rs`): if a
//! deliberate change to the navigator, the simulator or the trace format
//! changes it, update the constant in the same commit and say why (the
//! golden traces in `fixtures/golden/` will change too; see
//! `fixtures/README.md`). The same constant is checked through the `replay`
//! binary in a separate process by `replay/tests/cli_run.rs`; keep the two
//! equal.

use replay::campaign::{CampaignPlan, SeedResult, Shard, merge, read_results, write_results};
use replay::log::LogWriter;
use replay::run::{LiveOptions, build_sim, campaign_job, header_for, run_live, run_log};

/// Trace digest of `replay run demo:wrens-slot --seed 11 --max-time 3`, as
/// printed by the release binary (301 steps: 100 `HoldModeSettling` while the mode waits out its 1 s recovery dwell, then 201 `FollowUpstream`).
const WRENS_11_3S_DIGEST: &str = "1ee0f671a4b2b39d";

fn opts(max_time_s: f64) -> LiveOptions {
    LiveOptions {
        max_time_s: Some(max_time_s),
        scene_every: 0,
    }
}

#[test]
fn live_run_and_replay_of_its_log_give_identical_traces() {
    for input in ["demo:hollow-kettle", "demo:saltpetre-drift"] {
        let sim = build_sim(input, Some(4)).expect("demo");
        let header = header_for(&sim, input);
        let writer = LogWriter::new(Vec::new(), &header).expect("log writer");
        let mut live_trace = Vec::new();
        let (live, log) =
            run_live(input, sim, &mut live_trace, Some(writer), &opts(3.0)).expect("live run");
        let log = log.expect("the log comes back");
        let mut replay_trace = Vec::new();
        let replayed = run_log(input, log.as_slice(), &mut replay_trace, false).expect("replay");
        assert_eq!(replayed.outcome, "end of log", "{input}");
        assert_eq!(live.summary.trace.steps, 301, "{input}: 3 s at 100 Hz");
        assert_eq!(replayed.trace.steps, live.summary.trace.steps, "{input}");
        assert!(
            live_trace == replay_trace,
            "{input}: live and replayed traces differ"
        );
        assert_eq!(
            replayed.trace.trace_digest, live.summary.trace.trace_digest,
            "{input}"
        );
        assert_eq!(replayed.trace, live.summary.trace, "{input}");
    }
}

fn plan() -> CampaignPlan {
    CampaignPlan {
        scenarios: vec!["demo:hollow-kettle".into(), "demo:wrens-slot".into()],
        first_seed: 100,
        seeds: 4,
    }
}

/// Short runs (0.5 s of simulated time, 51 steps each) and few seeds keep
/// the test to a few seconds in debug (building a simulation, with its
/// network solve, costs more than the steps).
const CAMPAIGN_MAX_TIME_S: f64 = 0.5;

fn campaign(shard: Shard, threads: usize) -> Vec<SeedResult> {
    replay::campaign::run(
        &plan(),
        shard,
        threads,
        |j| campaign_job(j, Some(CAMPAIGN_MAX_TIME_S)),
        || {},
    )
    .expect("pool")
}

#[test]
fn campaign_results_do_not_depend_on_threads_or_shards() {
    let one = campaign(Shard::ALL, 1);
    assert_eq!(one.len(), 8);
    for (i, r) in one.iter().enumerate() {
        assert_eq!(r.job, i as u64);
        assert_eq!(r.trace_digest.len(), 16, "job {i}: {:?}", r.failure);
    }
    // Different seeds give different traces (sensor noise), so equal
    // results below are not equal by accident.
    let mut digests: Vec<&str> = one.iter().map(|r| r.trace_digest.as_str()).collect();
    digests.sort_unstable();
    digests.dedup();
    assert_eq!(digests.len(), one.len(), "every job has its own trace");

    assert_eq!(campaign(Shard::ALL, 2), one, "2 threads");
    assert_eq!(campaign(Shard::ALL, 4), one, "4 threads");

    // Sharded 0/3, 1/3, 2/3 through the results-file format, then merged.
    let mut files = Vec::new();
    for i in 0..3 {
        let shard = Shard { index: i, count: 3 };
        let rs = campaign(shard, 2);
        assert_eq!(rs.len(), if i < 2 { 3 } else { 2 }, "shard {i}/3");
        let mut bytes = Vec::new();
        write_results(&mut bytes, &plan(), shard, &rs).expect("write");
        files.push(read_results(bytes.as_slice(), &format!("shard {i}")).expect("read"));
    }
    // Order of the shard files does not matter.
    files.reverse();
    let (merged_plan, merged) = merge(files).expect("merge");
    assert_eq!(merged_plan, plan());
    assert_eq!(merged, one, "merged shards equal the unsharded campaign");
}

#[test]
fn fixed_short_run_has_the_committed_digest() {
    let sim = build_sim("demo:wrens-slot", Some(11)).expect("demo");
    let (res, _) =
        run_live::<_, std::io::Sink>("demo:wrens-slot", sim, std::io::sink(), None, &opts(3.0))
            .expect("live run");
    assert_eq!(res.summary.trace.steps, 301);
    assert_eq!(
        res.summary.trace.trace_digest, WRENS_11_3S_DIGEST,
        "trace digest changed; see the update rule at the top of this file"
    );
}
