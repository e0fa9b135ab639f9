//! Golden traces: every fixture log in `fixtures/logs/` replayed through the
//! navigator gives exactly (zero tolerance) the committed trace in
//! `fixtures/golden/`.
//!
//! The goldens were made by the RELEASE binary (`target/release/replay run
//! ...`, commands in `fixtures/README.md`); this test runs the navigator in
//! whatever profile the tests are built in, normally debug. Passing in
//! debug is what proves debug == release, bit for bit, on these logs.
//!
//! When a reviewed change alters the navigator's behaviour, this test fails
//! and names the first diverging step and fields. Regenerate the golden with
//! the `run` line in `fixtures/README.md` (release build) and commit it in
//! the same commit as the change, saying why the trace changed.

use std::path::{Path, PathBuf};

use replay::diff::{DiffOptions, Verdict, diff_traces};
use replay::run::run_log;

/// (fixture stem, scenario name recorded in the log header, seed).
const FIXTURES: [(&str, &str, u64); 3] = [
    ("kettle-7-12s", "Hollow Kettle", 7),
    ("wrens-3-10s", "Wren's Slot", 3),
    ("drift-5-10s", "Saltpetre Drift", 5),
];

fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../fixtures")
}

fn check(stem: &str) -> replay::run::RunSummary {
    let log_path = root().join(format!("logs/{stem}.upl"));
    let golden_path = root().join(format!("golden/{stem}.jsonl"));
    let summary_path = root().join(format!("golden/{stem}.summary.json"));
    let log = std::fs::read(&log_path).expect("fixture log");
    let mut trace = Vec::new();
    let summary = run_log(
        &log_path.display().to_string(),
        log.as_slice(),
        &mut trace,
        false,
    )
    .unwrap_or_else(|e| panic!("{}: {e}", log_path.display()));
    let golden = std::fs::read(&golden_path).expect("golden trace");
    let report = diff_traces(
        golden.as_slice(),
        &golden_path.display().to_string(),
        trace.as_slice(),
        "this build",
        &DiffOptions::default(),
    )
    .expect("both traces parse");
    assert_eq!(
        report.verdict(),
        Verdict::Same,
        "\n{stem}: the navigator's trace differs from the golden trace.\n{report}\n\
         If this change in behaviour is intended and reviewed, regenerate the golden \
         with the release binary and commit it with the change:\n  \
         cargo build --release -p replay && target/release/replay run fixtures/logs/{stem}.upl \
         --trace fixtures/golden/{stem}.jsonl --summary fixtures/golden/{stem}.summary.json\n"
    );
    // Same steps, so the bytes must match too (the diff compares values).
    assert!(trace == golden, "{stem}: same values but different bytes");

    let committed: serde_json::Value =
        serde_json::from_slice(&std::fs::read(&summary_path).expect("golden summary"))
            .expect("summary JSON");
    assert_eq!(
        committed["trace"]["trace_digest"].as_str(),
        Some(summary.trace.trace_digest.as_str()),
        "{stem}: digest differs from {}",
        summary_path.display()
    );
    assert_eq!(
        committed["trace"]["steps"].as_u64(),
        Some(summary.trace.steps)
    );
    summary
}

#[test]
fn fixture_logs_replay_to_their_golden_traces() {
    let mut digests = Vec::new();
    for (stem, scenario, seed) in FIXTURES {
        let s = check(stem);
        assert!(s.trace.steps > 500, "{stem}: only {} steps", s.trace.steps);
        // The log header says what it was made from.
        assert_eq!(s.scenario.as_deref(), Some(scenario), "{stem}");
        assert_eq!(s.seed, Some(seed), "{stem}");
        assert_eq!(s.outcome, "end of log", "{stem}");
        digests.push(s.trace.trace_digest);
    }
    digests.sort();
    digests.dedup();
    assert_eq!(digests.len(), FIXTURES.len(), "fixtures must differ");
}
