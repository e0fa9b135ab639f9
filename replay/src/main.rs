//! The `replay` command line: a thin binary over the `replay` library.
//! Each command lives in its own module under `cli/`: its arguments
//! (parsed and checked here, by clap, before it runs) and one function
//! that calls the library and writes through [`cli::out::Out`].
//!
//! Exit codes, for every command: 0 success (for `diff`: the traces are the
//! same; for `inspect`: the log is undamaged), 1 a finding (`diff`: the
//! traces differ; `inspect`: the log is damaged, the report says where),
//! 2 an error (bad arguments, unreadable files, a log whose header is
//! unusable, malformed JSON). A command whose standard output is closed
//! early stops quietly with status 141, as after SIGPIPE.

mod cli;

use clap::{Parser, Subcommand};
use cli::out::Out;
use std::process::ExitCode;

/// Ground tools for Upcurrent conduit robots: logs, traces, imports.
#[derive(Debug, Parser)]
#[command(name = "replay", version)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Debug, Subcommand)]
enum Command {
    /// Summarise a log: header, record counts, time span and gaps, sensor
    /// health, damage. Exit 0 if undamaged, 1 if damaged, 2 if unreadable.
    Inspect(cli::inspect::Args),
    /// Compare two decision traces (JSON Lines) field by field. Exit 0 if
    /// the same, 1 if different, 2 on error.
    Diff(cli::diff::Args),
    /// Turn a CSV rig log into a log, through a mapping file.
    Import(cli::import::Args),
    /// Simulate a built-in demo scenario, run the navigator on it, print
    /// the summary and write the trace, summary and plot.
    Demo(cli::demo::Args),
    /// List the built-in demo scenarios.
    Scenarios,
    /// Generate a world of a family from a seed and write it as a scenario
    /// file (to standard output without `-o`).
    World(cli::world::Args),
    /// List the world families and the parameters each draws.
    Worlds,
    /// Run generated worlds of every family (or those named) through the
    /// navigator and print one row per family; shardable like `campaign`.
    Scorecard(cli::scorecard::Args),
    /// Simulate a scenario with the navigator in the loop and record what
    /// the robot sensed as a log.
    Generate(cli::generate::Args),
    /// Run the navigator over a log, or live over a scenario file or
    /// `demo:<name>`; write the decision trace and summary; print the
    /// trace digest.
    Run(cli::run::Args),
    /// Many seeds over one or more scenarios, in parallel.
    Campaign(cli::campaign::Args),
    /// Combine campaign shard results exactly and print the summary table.
    Merge(cli::merge::Args),
    /// Draw a simulated run as SVG: top and side views.
    Plot(cli::plot::Args),
}

/// Hand the parsed command to its module.
fn dispatch(command: Command, out: &mut Out) -> Result<ExitCode, String> {
    match command {
        Command::Inspect(a) => cli::inspect::exec(a, out),
        Command::Diff(a) => cli::diff::exec(a, out),
        Command::Import(a) => cli::import::exec(a, out),
        Command::Demo(a) => cli::demo::exec(a, out),
        Command::Scenarios => Ok(cli::scenarios::exec(out)),
        Command::World(a) => cli::world::exec(&a, out),
        Command::Worlds => Ok(cli::world::list(out)),
        Command::Scorecard(a) => cli::scorecard::exec(a, out),
        Command::Generate(a) => cli::generate::exec(a, out),
        Command::Run(a) => cli::run::exec(a, out),
        Command::Campaign(a) => cli::campaign::exec(a, out),
        Command::Merge(a) => cli::merge::exec(a, out),
        Command::Plot(a) => cli::plot::exec(a, out),
    }
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let mut out = Out;
    match dispatch(cli.command, &mut out) {
        Ok(code) => code,
        Err(message) => {
            eprintln!("replay: {message}");
            ExitCode::from(2)
        }
    }
}
