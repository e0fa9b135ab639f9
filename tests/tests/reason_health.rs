//! Every reason code in a decision trace says what is true of the health
//! the same trace line reports: a property over traces of the demos, with
//! random seeds and, in some runs, the probe and the contacts silenced for
//! two seconds (so the traces hold degraded modes and their recovery).
//!
//! The rules checked, per line (`command.record.reason` against
//! `command.mode` and `command.health`):
//! - `HoldChannelsUnhealthy`: flow and tactile are both failed, the mode
//!   is `Hold`.
//! - `HoldModeSettling`: the mode is `Hold` but not both channels are
//!   failed (the mode waits out its recovery dwell).
//! - a reason that moves the robot (`Follow*`, `Recentre`, `EnterBranch`,
//!   `SwitchBranch`, `BackOut`, `ResumeNextBranch`): not both channels
//!   failed.
//! - `FollowFlowOnly`: the health mode is `FlowOnly`, the flow channel is
//!   not failed.

use proptest::prelude::*;
use replay::run::{LiveOptions, run_live};
use replay::sim::Sim;
use replay::sim::scenario::Scenario;

const DEMOS: [&str; 3] = ["hollow-kettle", "wrens-slot", "saltpetre-drift"];

/// Probe and contacts silent from 1 s to 3 s; the pose keeps coming.
const SILENCE: &str = r#"
[[fault]]
kind = "dropout"
at_s = 1.0
until_s = 3.0
channel = "probe"

[[fault]]
kind = "dropout"
at_s = 1.0
until_s = 3.0
channel = "contacts"
"#;

fn trace_of(demo: usize, seed: u64, silence: bool) -> Vec<serde_json::Value> {
    let key = DEMOS[demo];
    let text = replay::sim::demos::DEMOS
        .iter()
        .find(|(k, _)| *k == key)
        .map(|(_, t)| *t)
        .expect("demo");
    let text = if silence {
        format!("{text}\n{SILENCE}")
    } else {
        text.to_string()
    };
    let mut sc = Scenario::from_toml_str(&text).expect("scenario");
    sc.seed = seed;
    let sim = Sim::new(sc).expect("sim");
    let mut trace = Vec::new();
    let opts = LiveOptions {
        max_time_s: Some(5.0),
        scene_every: 0,
    };
    run_live::<_, std::io::Sink>(key, sim, &mut trace, None, &opts).expect("run");
    std::str::from_utf8(&trace)
        .expect("utf-8")
        .lines()
        .map(|l| serde_json::from_str(l).expect("JSON line"))
        .collect()
}

/// The first rule a trace line breaks, if any.
fn broken_rule(line: &serde_json::Value) -> Option<String> {
    let c = &line["command"];
    let reason = c["record"]["reason"].as_str()?;
    let mode = c["mode"].as_str().unwrap_or("?");
    let flow = c["health"]["flow"].as_str().unwrap_or("?");
    let tactile = c["health"]["tactile"].as_str().unwrap_or("?");
    let health_mode = c["health"]["health_mode"].as_str().unwrap_or("?");
    let both_failed = flow == "Failed" && tactile == "Failed";
    let moves = reason.starts_with("Follow")
        || matches!(
            reason,
            "Recentre" | "EnterBranch" | "SwitchBranch" | "BackOut" | "ResumeNextBranch"
        );
    let ok = match reason {
        "HoldChannelsUnhealthy" => both_failed && mode == "Hold",
        "HoldModeSettling" => !both_failed && mode == "Hold",
        "FollowFlowOnly" => health_mode == "FlowOnly" && flow != "Failed",
        _ if moves => !both_failed,
        _ => true,
    };
    (!ok).then(|| {
        format!(
            "step {}: reason {reason} with mode {mode}, flow {flow}, tactile {tactile}, health mode {health_mode}",
            line["step"]
        )
    })
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 6, ..ProptestConfig::default() })]

    #[test]
    fn every_reason_agrees_with_the_health_it_reports(
        demo in 0usize..3,
        seed in 1u64..10_000,
        silence in any::<bool>(),
    ) {
        let trace = trace_of(demo, seed, silence);
        prop_assert!(trace.len() > 100);
        for line in &trace {
            if let Some(why) = broken_rule(line) {
                prop_assert!(false, "{} seed {seed} (silenced: {silence}): {why}", DEMOS[demo]);
            }
        }
    }
}

/// The start-up hold, with both channels reporting from the first frame,
/// is the mode settling (its recovery dwell), not unhealthy channels. (The
/// hold with both channels silent is `nav_props.rs`,
/// `holds_when_both_channels_go_silent`.)
#[test]
fn the_start_up_hold_is_the_mode_settling() {
    let trace = trace_of(0, 7, false);
    let c = &trace[1]["command"];
    assert_eq!(c["health"]["flow"], "Ok");
    assert_eq!(c["health"]["tactile"], "Ok");
    assert_eq!(c["mode"], "Hold");
    assert_eq!(c["record"]["reason"], "HoldModeSettling");
    assert!(
        trace
            .iter()
            .all(|l| l["command"]["record"]["reason"] != "HoldChannelsUnhealthy"),
        "both channels report throughout"
    );
}
