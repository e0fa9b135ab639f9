//! The full scorecard: N generated worlds per family (default 200) through
//! the navigator, one row per family, then one machine-readable line per
//! family (`scorecard family=<f> worlds=<n> reached=<frac> wrong=<frac>
//! strike_free=<frac> standoff_p5_m=<x> efficiency_p50=<y>`).
//!
//! ```sh
//! cargo run --release -p replay --example scorecard -- [WORLDS] [THREADS]
//! ```
//!
//! The same as `replay scorecard --worlds WORLDS --threads THREADS`; the
//! results do not depend on the thread count.

use replay::campaign::{self, CampaignPlan, Shard};
use replay::scorecard::{format_table, machine_line, rows};
use replay::sim::worlds::Family;

fn main() {
    let mut args = std::env::args().skip(1);
    let worlds: u64 = args.next().and_then(|a| a.parse().ok()).unwrap_or(200);
    let threads: usize = args.next().and_then(|a| a.parse().ok()).unwrap_or(0);
    let plan = CampaignPlan {
        scenarios: Family::ALL
            .iter()
            .map(|f| format!("world:{}", f.name()))
            .collect(),
        first_seed: 1,
        seeds: worlds,
    };
    let started = std::time::Instant::now();
    let results = match campaign::run(
        &plan,
        Shard::ALL,
        threads,
        |j| replay::run::campaign_job(j, None),
        || {},
    ) {
        Ok(r) => r,
        Err(e) => {
            eprintln!("scorecard: {e}");
            std::process::exit(2);
        }
    };
    let rows = rows(&plan, &results);
    print!("{}", format_table(&rows));
    println!(
        "{} worlds in {:.1} s wall time",
        results.len(),
        started.elapsed().as_secs_f64()
    );
    for r in &rows {
        println!("{}", machine_line(r));
    }
}
