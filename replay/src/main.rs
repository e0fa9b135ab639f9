//! The `replay` command line: parsing, printing and exit codes only; the
//! work is done by the `replay` library.
//!
//! Exit codes, for every command: 0 success (for `diff`: the traces are the
//! same; for `inspect`: the log is undamaged), 1 a finding (`diff`: the
//! traces differ; `inspect`: the log is damaged, the report says where),
//! 2 an error (bad arguments, unreadable files, a log whose header is
//! unusable, malformed JSON).

use std::io::Write;
use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Parser, Subcommand};
use replay::diff::{DiffOptions, Tolerance, Verdict, diff_files};
use replay::import::import_files;
use replay::log::{ReadOptions, inspect};

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
    Inspect {
        /// The log file.
        log: PathBuf,
        /// Print the report as JSON.
        #[arg(long)]
        json: bool,
        /// Largest record accepted, bytes (longer ones are damage).
        #[arg(long, value_name = "BYTES", default_value_t = 1 << 20)]
        max_record: u32,
    },
    /// Compare two decision traces (JSON Lines) field by field. Exit 0 if
    /// the same, 1 if different, 2 on error.
    Diff {
        /// Trace A (the reference).
        a: PathBuf,
        /// Trace B.
        b: PathBuf,
        /// Absolute tolerance for float fields.
        #[arg(long, value_name = "X", default_value_t = 0.0)]
        abs_tol: f64,
        /// Relative tolerance for float fields (fraction of the larger
        /// magnitude).
        #[arg(long, value_name = "Y", default_value_t = 0.0)]
        rel_tol: f64,
        /// Most fields listed for the first diverging step.
        #[arg(long, value_name = "N", default_value_t = 50)]
        fields: usize,
        /// Print the report as JSON.
        #[arg(long)]
        json: bool,
    },
    /// Turn a CSV rig log into a log, through a mapping file.
    Import {
        /// The CSV rig log.
        csv: PathBuf,
        /// The mapping file (TOML; see `replay::import` or LOGFORMAT.md).
        #[arg(long, value_name = "TOML")]
        map: PathBuf,
        /// The log to write.
        #[arg(short = 'o', long = "out", value_name = "LOG")]
        out: PathBuf,
    },
    // Commands to come (issue 7), each a thin wrapper over its library
    // module, added with that module:
    //   demo      simulate the built-in scenario, run, summarise, plot
    //   generate  scenario file or demo + seed -> log
    //   run       navigator over a log or a live simulation -> trace, summary, digest
    //   campaign  many seeds, parallel, --shard i/n
    //   merge     combine campaign shards exactly
    //   plot      SVG of a run
}

fn print_json<T: serde::Serialize>(v: &T) -> Result<(), String> {
    let text = serde_json::to_string_pretty(v).map_err(|e| e.to_string())?;
    println!("{text}");
    Ok(())
}

fn run(cli: Cli) -> Result<ExitCode, String> {
    match cli.command {
        Command::Inspect {
            log,
            json,
            max_record,
        } => {
            let file = std::fs::File::open(&log).map_err(|e| format!("{}: {e}", log.display()))?;
            let opts = ReadOptions {
                max_record_bytes: max_record,
                ..ReadOptions::salvage()
            };
            let report = inspect(std::io::BufReader::new(file), opts)
                .map_err(|e| format!("{}: {e}", log.display()))?;
            if json {
                print_json(&report)?;
            } else {
                print!("{report}");
            }
            Ok(ExitCode::from(if report.is_clean() { 0 } else { 1 }))
        }
        Command::Diff {
            a,
            b,
            abs_tol,
            rel_tol,
            fields,
            json,
        } => {
            let opts = DiffOptions {
                tolerance: Tolerance {
                    abs: abs_tol,
                    rel: rel_tol,
                },
                max_fields_listed: fields,
            };
            let result = diff_files(&a, &b, &opts);
            let verdict = Verdict::of(&result);
            match &result {
                Ok(r) if json => print_json(r)?,
                Ok(r) => print!("{r}"),
                Err(e) => eprintln!("replay diff: {e}"),
            }
            Ok(ExitCode::from(verdict.exit_code()))
        }
        Command::Import { csv, map, out } => {
            let sum = import_files(&csv, &map, &out).map_err(|e| e.to_string())?;
            println!(
                "imported {} rows: {} frames, {} notes, {} contacts, {} bytes -> {}",
                sum.rows,
                sum.frames,
                sum.notes,
                sum.contacts,
                sum.bytes,
                out.display()
            );
            println!(
                "missing: ports in {} rows ({} single port cells as NaN), pose in {} rows, joints in {} rows",
                sum.rows_without_ports,
                sum.missing_port_cells,
                sum.rows_without_pose,
                sum.rows_without_joints
            );
            Ok(ExitCode::SUCCESS)
        }
    }
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let code = match run(cli) {
        Ok(code) => code,
        Err(message) => {
            eprintln!("replay: {message}");
            ExitCode::from(2)
        }
    };
    let _ = std::io::stdout().flush();
    code
}
