//! Human-readable reports of runs and campaigns, as text for a terminal
//! (the JSON files keep every number at full precision).

use crate::campaign::SeedResult;
use crate::run::RunSummary;
use std::fmt::Write as _;

/// The summary of one run, one labelled line per item.
#[must_use]
pub fn run_summary_text(s: &RunSummary) -> String {
    let mut o = String::new();
    let _ = writeln!(o, "input        {}", s.input);
    if let (Some(name), Some(seed)) = (&s.scenario, s.seed) {
        let _ = writeln!(o, "scenario     {name} (seed {seed})");
    }
    let _ = writeln!(o, "outcome      {}", s.outcome);
    let _ = writeln!(
        o,
        "steps        {} ({:.2} s to {:.2} s)",
        s.trace.steps, s.time_span_s[0], s.time_span_s[1]
    );
    if let Some(t) = &s.truth {
        let _ = writeln!(
            o,
            "truth        reached source: {}{}; wrong branches {}; min standoff {:.3} m; wall strikes {}; travelled {:.1} m; held {:.1} s",
            if t.reached_source { "yes" } else { "no" },
            t.reached_at_s
                .map_or(String::new(), |x| format!(" at {x:.1} s")),
            t.wrong_branches,
            t.min_standoff_m,
            t.wall_strikes,
            t.distance_travelled_m,
            t.time_held_s
        );
    }
    let _ = writeln!(o, "mode changes {}", s.trace.mode_changes);
    let mut reasons: Vec<_> = s.trace.reasons.iter().collect();
    reasons.sort_by(|a, b| b.1.cmp(a.1).then(a.0.cmp(b.0)));
    let top: Vec<String> = reasons
        .iter()
        .take(5)
        .map(|(k, v)| format!("{k} {v}"))
        .collect();
    let _ = writeln!(o, "reasons      {}", top.join(", "));
    if !s.faults_seen.is_empty() {
        let _ = writeln!(o, "faults       {}", s.faults_seen.join("; "));
    }
    let _ = writeln!(o, "digest       {}", s.trace.trace_digest);
    o
}

/// The failing runs of a campaign, each with the one command that reruns
/// it (with the campaign's time limit, when it had one; merged shards do
/// not record it). Empty when no run failed.
#[must_use]
pub fn failures_text(results: &[SeedResult], max_time_s: Option<f64>) -> String {
    let limit = max_time_s.map_or(String::new(), |t| format!(" --max-time {t}"));
    let failing: Vec<_> = results
        .iter()
        .filter(|r| !r.reached || r.wall_strikes > 0)
        .collect();
    let mut o = String::new();
    if failing.is_empty() {
        return o;
    }
    let _ = writeln!(o, "failing runs ({}), each rerun by:", failing.len());
    for r in failing {
        let _ = writeln!(
            o,
            "  replay run {} --seed {}{limit}    # {}",
            r.scenario,
            r.seed,
            r.failure.as_deref().unwrap_or(if r.reached {
                "wall strike"
            } else {
                "not reached"
            })
        );
    }
    o
}
