//! Human-readable reports of runs and campaigns, as text for a terminal
//! (the JSON files keep every number at full precision).

use crate::campaign::SeedResult;
use crate::run::RunSummary;
use std::fmt::Write as _;

/// `singular` for 1, `plural` otherwise.
#[must_use]
pub fn plural<'a>(n: u64, singular: &'a str, plural: &'a str) -> &'a str {
    if n == 1 { singular } else { plural }
}

/// `3 ports`, `1 port`.
#[must_use]
pub fn count(n: u64, singular: &str, plural_form: &str) -> String {
    format!("{n} {}", plural(n, singular, plural_form))
}

/// What a salvaging read skipped, for standard error: a summary line and
/// one line per damaged place. Empty when nothing was skipped.
#[must_use]
pub fn salvage_text(s: &RunSummary) -> String {
    let mut o = String::new();
    if let Some(v) = &s.salvaged {
        let _ = writeln!(
            o,
            "skipped {} at {}: {} bytes, {} lost",
            count(v.places, "damaged place", "damaged places"),
            if v.places == 1 {
                "this offset"
            } else {
                "these offsets"
            },
            v.bytes_skipped,
            count(v.records_lost, "record", "records")
        );
        for d in &v.damage {
            let _ = writeln!(o, "  {d}");
        }
        let unlisted = v.places.saturating_sub(v.damage.len() as u64);
        if unlisted > 0 {
            let _ = writeln!(o, "  ... and {unlisted} more not listed");
        }
    }
    o
}

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
    let t = &s.trace;
    if t.failed_ports_count > 0 || t.failed_contacts_count > 0 {
        let _ = writeln!(
            o,
            "failed       {} (mask {:#x}), {} (mask {:#x})",
            count(u64::from(t.failed_ports_count), "port", "ports"),
            t.failed_ports_mask,
            count(
                u64::from(t.failed_contacts_count),
                "contact sensor",
                "contact sensors"
            ),
            t.failed_contacts_mask
        );
    }
    if let Some(v) = &s.salvaged {
        let _ = writeln!(
            o,
            "salvaged     {}, {} bytes skipped, {} lost",
            count(v.places, "damaged place", "damaged places"),
            v.bytes_skipped,
            count(v.records_lost, "record", "records")
        );
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
        .filter(|r| !r.reached || !r.strike_free())
        .collect();
    let mut o = String::new();
    if failing.is_empty() {
        return o;
    }
    let _ = writeln!(o, "failing runs ({}), each rerun by:", failing.len());
    for r in failing {
        // Say every way the run failed: a run that timed out after
        // striking the wall thousands of times is listed with its strikes.
        let mut why: Vec<String> = Vec::new();
        if !r.reached {
            why.push(
                r.failure
                    .clone()
                    .unwrap_or_else(|| "not reached".to_string()),
            );
        }
        if r.wall_strikes > 0 {
            why.push(count(
                u64::from(r.wall_strikes),
                "wall strike",
                "wall strikes",
            ));
        }
        if r.skin_overpress > 0 {
            why.push(format!(
                "skin pressed past its compliance {}",
                count(u64::from(r.skin_overpress), "time", "times")
            ));
        }
        let _ = writeln!(
            o,
            "  replay run {} --seed {}{limit}    # {}",
            r.scenario,
            r.seed,
            why.join(", ")
        );
    }
    o
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::sim::scenario::{Channel, Fault, FaultKind};

    #[test]
    fn failing_runs_name_every_failure() {
        let r = |seed, reached, strikes, failure: Option<&str>| SeedResult {
            job: seed,
            scenario: "demo:x".into(),
            seed,
            reached,
            time_to_source_s: None,
            wrong_branches: 0,
            min_standoff_m: 0.0,
            wall_strikes: strikes,
            held_s: 0.0,
            trace_digest: String::new(),
            failure: failure.map(str::to_string),
            ..SeedResult::default()
        };
        let text = failures_text(
            &[
                r(1, false, 2345, Some("time limit")),
                r(2, true, 1, None),
                r(3, true, 0, None),
            ],
            Some(30.0),
        );
        assert!(text.starts_with("failing runs (2)"), "{text}");
        assert!(
            text.contains("--seed 1 --max-time 30    # time limit, 2345 wall strikes"),
            "{text}"
        );
        assert!(
            text.contains("--seed 2 --max-time 30    # 1 wall strike"),
            "{text}"
        );
        assert!(!text.contains("--seed 3"), "{text}");
    }

    #[test]
    fn plurals() {
        assert_eq!(count(1, "place", "places"), "1 place");
        assert_eq!(count(0, "place", "places"), "0 places");
        assert_eq!(count(2, "record", "records"), "2 records");
    }

    #[test]
    fn faults_read_as_words_with_their_end() {
        let f = Fault {
            kind: FaultKind::Dropout {
                channel: Channel::Pose,
            },
            at_s: 40.0,
            until_s: 45.5,
        };
        assert_eq!(f.to_string(), "pose dropout from 40 s to 45.5 s");
        let g = Fault {
            kind: FaultKind::PortStuck { port: 5 },
            at_s: 45.0,
            until_s: f64::INFINITY,
        };
        assert_eq!(g.to_string(), "port 5 stuck from 45 s");
        let layout = crate::record::ProbeLayoutSpec::SevenPort {
            cone_angle_deg: 40.0,
        };
        assert_eq!(
            layout.to_string(),
            "7-port, side ports at 40° from the axis"
        );
    }
}
