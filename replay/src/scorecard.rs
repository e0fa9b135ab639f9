//! The scorecard: the navigator measured on generated worlds, one row per
//! family.
//!
//! A scorecard is a campaign ([`crate::campaign`]) whose scenarios are
//! `world:<family>` and whose seeds pick the worlds, so it runs in
//! parallel, shards and merges exactly like any campaign, with results that
//! do not depend on the thread count. This module only turns results into
//! rows:
//!
//! - `reached`: runs that did the right thing (reached a source where one is
//!   reachable; held without a strike where none is) over worlds;
//! - `wrong`: wrong clear branch calls over clear calls (policy-true, see
//!   [`crate::sim::policy`]; clear: flows differ by 20 % or more);
//! - `strike_free`: runs with no strike of either kind (head stopped by a
//!   wall after a free step, skin pressed past its compliance) over worlds;
//! - `clean`: runs that did the right thing *and* struck nothing, over
//!   worlds (a run that reached its source by pressing through a narrowing
//!   counts as reached, not as clean);
//! - standoff p5 and p50 (minimum true skin-to-wall distance of each run;
//!   negative is penetration), time to source p50 and p95, path efficiency
//!   p50 (true path length over distance travelled, reached runs), held
//!   time p50;
//! - the failing worlds (not reached, or struck) with the commands that
//!   regenerate and rerun each.
//!
//! Tests: `tests/tests/worlds.rs::small_scorecard_meets_measured_floor`.

use crate::campaign::{CampaignPlan, SeedResult, percentile};

/// One family's row.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct FamilyRow {
    /// Family name.
    pub family: String,
    /// Worlds run.
    pub worlds: u64,
    /// Fraction that did the right thing.
    pub reached: f64,
    /// Wrong clear calls over clear calls (NaN when there were none).
    pub wrong: f64,
    /// Clear calls judged.
    pub clear_calls: u64,
    /// Fraction with no strike.
    pub strike_free: f64,
    /// Fraction that did the right thing with no strike.
    pub clean: f64,
    /// Minimum-standoff percentiles 5 and 50, m.
    pub standoff_p5_p50_m: [f64; 2],
    /// Time-to-source percentiles 50 and 95 over reached runs, s.
    pub time_p50_p95_s: [f64; 2],
    /// Median path efficiency over reached runs.
    pub efficiency_p50: f64,
    /// Median time held, s.
    pub held_p50_s: f64,
    /// Median count of steps with the skin touching a wall (fine).
    pub touch_steps_p50: f64,
    /// The failing worlds: `(seed, why)`.
    pub failing: Vec<(u64, String)>,
}

/// The family name of a `world:` scenario (`world:fork,ratio=2` is
/// `fork,ratio=2`); other scenarios keep their name.
#[must_use]
pub fn family_of(scenario: &str) -> &str {
    scenario.strip_prefix("world:").unwrap_or(scenario)
}

/// Why a run fails the scorecard, or `None`.
#[must_use]
pub fn failure_of(r: &SeedResult) -> Option<String> {
    let strikes = r.wall_strikes + r.skin_overpress;
    match (r.succeeded(), strikes) {
        (true, 0) => None,
        (true, n) => Some(format!("reached with {n} strike{}", plural(n))),
        (false, 0) => Some(r.failure.clone().unwrap_or_else(|| "not reached".into())),
        (false, n) => Some(format!(
            "{} with {n} strike{}",
            r.failure.as_deref().unwrap_or("not reached"),
            plural(n)
        )),
    }
}

fn plural(n: u32) -> &'static str {
    if n == 1 { "" } else { "s" }
}

/// Rows in plan order.
#[must_use]
pub fn rows(plan: &CampaignPlan, results: &[SeedResult]) -> Vec<FamilyRow> {
    plan.scenarios
        .iter()
        .map(|s| row(family_of(s), results.iter().filter(|r| &r.scenario == s)))
        .collect()
}

fn sorted(v: impl Iterator<Item = f64>) -> Vec<f64> {
    let mut v: Vec<f64> = v.filter(|x| !x.is_nan()).collect();
    v.sort_by(f64::total_cmp);
    v
}

fn row<'a>(family: &str, rs: impl Iterator<Item = &'a SeedResult>) -> FamilyRow {
    let rs: Vec<&SeedResult> = rs.collect();
    #[allow(clippy::cast_precision_loss)]
    let n = rs.len() as f64;
    let frac = |k: usize| {
        #[allow(clippy::cast_precision_loss)]
        let k = k as f64;
        if n > 0.0 { k / n } else { f64::NAN }
    };
    let pct = |v: &[f64], p| percentile(v, p).unwrap_or(f64::NAN);
    let standoff = sorted(rs.iter().map(|r| r.min_standoff_m));
    let times = sorted(rs.iter().filter_map(|r| r.time_to_source_s));
    let eff = sorted(rs.iter().filter_map(|r| r.path_efficiency));
    let held = sorted(rs.iter().map(|r| r.held_s));
    let clear: u64 = rs.iter().map(|r| u64::from(r.clear_calls)).sum();
    let wrong: u64 = rs.iter().map(|r| u64::from(r.wrong_clear_calls)).sum();
    #[allow(clippy::cast_precision_loss)]
    let touch = sorted(rs.iter().map(|r| r.touch_steps as f64));
    FamilyRow {
        family: family.to_string(),
        worlds: rs.len() as u64,
        reached: frac(rs.iter().filter(|r| r.succeeded()).count()),
        #[allow(clippy::cast_precision_loss)]
        wrong: if clear > 0 {
            wrong as f64 / clear as f64
        } else {
            f64::NAN
        },
        clear_calls: clear,
        strike_free: frac(rs.iter().filter(|r| r.strike_free()).count()),
        clean: frac(
            rs.iter()
                .filter(|r| r.succeeded() && r.strike_free())
                .count(),
        ),
        standoff_p5_p50_m: [pct(&standoff, 5.0), pct(&standoff, 50.0)],
        time_p50_p95_s: [pct(&times, 50.0), pct(&times, 95.0)],
        efficiency_p50: pct(&eff, 50.0),
        held_p50_s: pct(&held, 50.0),
        touch_steps_p50: pct(&touch, 50.0),
        failing: rs
            .iter()
            .filter_map(|r| failure_of(r).map(|w| (r.seed, w)))
            .collect(),
    }
}

fn pc(x: f64) -> String {
    if x.is_nan() {
        "-".into()
    } else {
        format!("{:.1}%", 100.0 * x)
    }
}

fn num(x: f64, digits: usize) -> String {
    if x.is_nan() {
        "-".into()
    } else {
        format!("{x:.digits$}")
    }
}

/// The rows as a table for reading.
#[must_use]
pub fn format_table(rows: &[FamilyRow]) -> String {
    use std::fmt::Write as _;
    let mut o = String::new();
    let _ = writeln!(
        o,
        "{:<18} {:>6} {:>8} {:>12} {:>11} {:>7} {:>19} {:>16} {:>10} {:>8}",
        "family",
        "worlds",
        "reached",
        "wrong/clear",
        "strike-free",
        "clean",
        "standoff p5/p50 m",
        "to source p50/p95 s",
        "efficiency",
        "held p50 s"
    );
    for r in rows {
        let _ = writeln!(
            o,
            "{:<18} {:>6} {:>8} {:>12} {:>11} {:>7} {:>19} {:>16} {:>10} {:>8}",
            r.family,
            r.worlds,
            pc(r.reached),
            format!("{} of {}", pc(r.wrong), r.clear_calls),
            pc(r.strike_free),
            pc(r.clean),
            format!(
                "{}/{}",
                num(r.standoff_p5_p50_m[0], 3),
                num(r.standoff_p5_p50_m[1], 3)
            ),
            format!(
                "{}/{}",
                num(r.time_p50_p95_s[0], 0),
                num(r.time_p50_p95_s[1], 0)
            ),
            num(r.efficiency_p50, 2),
            num(r.held_p50_s, 1)
        );
    }
    o
}

/// The machine-readable line of a row.
#[must_use]
pub fn machine_line(r: &FamilyRow) -> String {
    format!(
        "scorecard family={} worlds={} reached={:.4} wrong={:.4} strike_free={:.4} clean={:.4} standoff_p5_m={:.4} efficiency_p50={:.4}",
        r.family,
        r.worlds,
        r.reached,
        r.wrong,
        r.strike_free,
        r.clean,
        r.standoff_p5_p50_m[0],
        r.efficiency_p50
    )
}

/// The commands that regenerate and rerun one world.
#[must_use]
pub fn rerun_commands(scenario: &str, seed: u64, max_time_s: Option<f64>) -> String {
    let t = max_time_s.map_or(String::new(), |t| format!(" --max-time {t}"));
    let spec = family_of(scenario);
    let file = format!("{}-{seed}.toml", spec.replace([',', '='], "_"));
    format!(
        "replay world {spec} --seed {seed} -o {file} && replay run {file}{t} && replay plot {file}{t} -o {}.svg",
        file.trim_end_matches(".toml")
    )
}

/// The whole report: the table, one machine-readable line per family, and
/// the failing worlds with the commands that regenerate and rerun each.
#[must_use]
pub fn report(plan: &CampaignPlan, results: &[SeedResult], max_time_s: Option<f64>) -> String {
    use std::fmt::Write as _;
    let rows = rows(plan, results);
    let mut o = format_table(&rows);
    for r in &rows {
        let _ = writeln!(o, "{}", machine_line(r));
    }
    let failing: usize = rows.iter().map(|r| r.failing.len()).sum();
    if failing > 0 {
        let _ = writeln!(
            o,
            "failing worlds ({failing}), each regenerated and rerun by:"
        );
        for (r, s) in rows.iter().zip(&plan.scenarios) {
            for (seed, why) in &r.failing {
                let _ = writeln!(o, "  {}    # {why}", rerun_commands(s, *seed, max_time_s));
            }
        }
    }
    o
}
