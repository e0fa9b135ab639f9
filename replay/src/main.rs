//! The `replay` command line: parsing, printing and exit codes only; the
//! work is done by the `replay` library.
//!
//! Exit codes, for every command: 0 success (for `diff`: the traces are the
//! same; for `inspect`: the log is undamaged), 1 a finding (`diff`: the
//! traces differ; `inspect`: the log is damaged, the report says where),
//! 2 an error (bad arguments, unreadable files, a log whose header is
//! unusable, malformed JSON).

use std::io::Write;

/// `println!` that ends the process quietly when standard output is
/// closed (a reader such as `head` stopped early) instead of panicking:
/// exit status 141, as a shell reports a process ended by SIGPIPE.
macro_rules! outln {
    ($($t:tt)*) => {{
        let mut o = std::io::stdout().lock();
        if writeln!(o, $($t)*).is_err() {
            stdout_closed()
        }
    }};
}

/// `print!` with the same handling as [`outln!`].
macro_rules! out {
    ($($t:tt)*) => {{
        let mut o = std::io::stdout().lock();
        if write!(o, $($t)*).and_then(|()| o.flush()).is_err() {
            stdout_closed()
        }
    }};
}

/// Standard output is gone: stop at once, with the SIGPIPE status.
fn stdout_closed() -> ! {
    std::process::exit(141)
}
use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Parser, Subcommand};
use replay::diff::{DiffOptions, Tolerance, Verdict, diff_files};
use replay::import::import_files;
use replay::log::{LogWriter, ReadOptions, inspect};
use replay::run::{LiveOptions, RunSummary, build_sim, header_for, run_live, run_log};

/// The demo the README's first command runs.
const DEFAULT_DEMO: &str = "wrens-slot";

fn create(path: &std::path::Path) -> Result<std::io::BufWriter<std::fs::File>, String> {
    if let Some(dir) = path.parent()
        && !dir.as_os_str().is_empty()
    {
        std::fs::create_dir_all(dir).map_err(|e| format!("{}: {e}", dir.display()))?;
    }
    let f = std::fs::File::create(path).map_err(|e| format!("{}: {e}", path.display()))?;
    Ok(std::io::BufWriter::new(f))
}

fn write_json<T: serde::Serialize>(path: &std::path::Path, v: &T) -> Result<(), String> {
    let mut w = create(path)?;
    serde_json::to_writer_pretty(&mut w, v).map_err(|e| e.to_string())?;
    w.write_all(b"\n").map_err(|e| e.to_string())?;
    w.flush().map_err(|e| format!("{}: {e}", path.display()))
}

fn print_summary(s: &RunSummary) {
    outln!("input        {}", s.input);
    if let (Some(name), Some(seed)) = (&s.scenario, s.seed) {
        outln!("scenario     {name} (seed {seed})");
    }
    outln!("outcome      {}", s.outcome);
    outln!(
        "steps        {} ({:.2} s to {:.2} s)",
        s.trace.steps,
        s.time_span_s[0],
        s.time_span_s[1]
    );
    if let Some(t) = &s.truth {
        outln!(
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
    outln!("mode changes {}", s.trace.mode_changes);
    let mut reasons: Vec<_> = s.trace.reasons.iter().collect();
    reasons.sort_by(|a, b| b.1.cmp(a.1).then(a.0.cmp(b.0)));
    let top: Vec<String> = reasons
        .iter()
        .take(5)
        .map(|(k, v)| format!("{k} {v}"))
        .collect();
    outln!("reasons      {}", top.join(", "));
    if !s.faults_seen.is_empty() {
        outln!("faults       {}", s.faults_seen.join("; "));
    }
    outln!("digest       {}", s.trace.trace_digest);
}

fn is_log(path: &str) -> bool {
    let mut magic = [0u8; 8];
    std::fs::File::open(path)
        .and_then(|mut f| std::io::Read::read_exact(&mut f, &mut magic))
        .is_ok()
        && &magic == b"UPCURLOG"
}

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
    /// Simulate a built-in demo scenario, run the navigator on it, print
    /// the summary and write the trace, summary and plot.
    Demo {
        /// Which demo (see `replay scenarios`).
        #[arg(default_value = DEFAULT_DEMO)]
        name: String,
        /// Seed (default: the scenario's own).
        #[arg(long)]
        seed: Option<u64>,
        /// Output folder.
        #[arg(long, value_name = "DIR", default_value = "out/demo")]
        out: PathBuf,
        /// Stop after this much simulated time, s (default: the scenario's
        /// duration).
        #[arg(long, value_name = "S")]
        max_time: Option<f64>,
    },
    /// List the built-in demo scenarios.
    Scenarios,
    /// Generate a world of a family from a seed and write it as a scenario
    /// file (to standard output without `-o`).
    World {
        /// The family, optionally with fixed parameters:
        /// `fork` or `fork,ratio=2.5,branches=3` (`replay worlds` lists them).
        family: String,
        /// World seed: the same family, seed and parameters give the same
        /// world.
        #[arg(long, default_value_t = 1)]
        seed: u64,
        /// Scenario file to write.
        #[arg(short = 'o', long = "out", value_name = "FILE")]
        out: Option<PathBuf>,
    },
    /// List the world families and the parameters each draws.
    Worlds,
    /// Run generated worlds of every family (or those named) through the
    /// navigator and print one row per family; shardable like `campaign`.
    Scorecard {
        /// Families (repeatable; default all). A family may carry fixed
        /// parameters, `--family fork,ratio=1.5`.
        #[arg(long = "family", value_name = "FAMILY")]
        families: Vec<String>,
        /// Worlds per family.
        #[arg(long, default_value_t = 20)]
        worlds: u64,
        /// First world seed.
        #[arg(long, default_value_t = 1)]
        first_seed: u64,
        /// Worker threads (0: one per core).
        #[arg(long, default_value_t = 0)]
        threads: usize,
        /// Run only shard i of n (0-based), e.g. `--shard 3/16`.
        #[arg(long, value_name = "I/N")]
        shard: Option<String>,
        /// Results file (JSON Lines; `merge` combines shards).
        #[arg(
            short = 'o',
            long = "out",
            value_name = "FILE",
            default_value = "out/scorecard.jsonl"
        )]
        out: PathBuf,
        /// Stop each run after this much simulated time, s (default: each
        /// world's own duration).
        #[arg(long, value_name = "S")]
        max_time: Option<f64>,
        /// No progress bar.
        #[arg(long)]
        quiet: bool,
    },
    /// Simulate a scenario with the navigator in the loop and record what
    /// the robot sensed as a log.
    Generate {
        /// A scenario file, or `demo:<name>`.
        scenario: String,
        /// Seed (default: the scenario's own).
        #[arg(long)]
        seed: Option<u64>,
        /// The log to write.
        #[arg(short = 'o', long = "out", value_name = "LOG")]
        out: PathBuf,
        /// Stop after this much simulated time, s.
        #[arg(long, value_name = "S")]
        max_time: Option<f64>,
    },
    /// Run the navigator over a log, or live over a scenario file or
    /// `demo:<name>`; write the decision trace and summary; print the
    /// trace digest.
    Run {
        /// A log file, a scenario file, or `demo:<name>`.
        input: String,
        /// Seed for a simulated run (default: the scenario's own).
        #[arg(long)]
        seed: Option<u64>,
        /// Trace file (JSON Lines).
        #[arg(long, value_name = "FILE", default_value = "out/trace.jsonl")]
        trace: PathBuf,
        /// Summary file (JSON).
        #[arg(long, value_name = "FILE", default_value = "out/summary.json")]
        summary: PathBuf,
        /// Read a damaged log, skipping damaged records.
        #[arg(long)]
        salvage: bool,
        /// Stop a simulated run after this much time, s.
        #[arg(long, value_name = "S")]
        max_time: Option<f64>,
    },
    /// Many seeds over one or more scenarios, in parallel.
    Campaign {
        /// Scenario files or `demo:<name>` (repeatable).
        #[arg(long = "scenario", value_name = "SCENARIO", required = true)]
        scenarios: Vec<String>,
        /// Seeds per scenario.
        #[arg(long, default_value_t = 100)]
        seeds: u64,
        /// First seed.
        #[arg(long, default_value_t = 1)]
        first_seed: u64,
        /// Worker threads (0: one per core).
        #[arg(long, default_value_t = 0)]
        threads: usize,
        /// Run only shard i of n (0-based), e.g. `--shard 3/16`.
        #[arg(long, value_name = "I/N")]
        shard: Option<String>,
        /// Results file (JSON Lines; input to `merge`).
        #[arg(
            short = 'o',
            long = "out",
            value_name = "FILE",
            default_value = "out/campaign.jsonl"
        )]
        out: PathBuf,
        /// Stop each run after this much simulated time, s.
        #[arg(long, value_name = "S")]
        max_time: Option<f64>,
        /// No progress bar.
        #[arg(long)]
        quiet: bool,
    },
    /// Combine campaign shard results exactly and print the summary table.
    Merge {
        /// Shard results files.
        #[arg(required = true)]
        files: Vec<PathBuf>,
        /// Merged results file.
        #[arg(short = 'o', long = "out", value_name = "FILE")]
        out: Option<PathBuf>,
    },
    /// Draw a simulated run as SVG: top and side views.
    Plot {
        /// A scenario file or `demo:<name>`.
        input: String,
        /// Seed (default: the scenario's own).
        #[arg(long)]
        seed: Option<u64>,
        /// The SVG to write.
        #[arg(
            short = 'o',
            long = "out",
            value_name = "SVG",
            default_value = "out/run.svg"
        )]
        out: PathBuf,
        /// Stop after this much simulated time, s.
        #[arg(long, value_name = "S")]
        max_time: Option<f64>,
    },
}

fn print_json<T: serde::Serialize>(v: &T) -> Result<(), String> {
    let text = serde_json::to_string_pretty(v).map_err(|e| e.to_string())?;
    outln!("{text}");
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
                out!("{report}");
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
                Ok(r) => out!("{r}"),
                Err(e) => eprintln!("replay diff: {e}"),
            }
            Ok(ExitCode::from(verdict.exit_code()))
        }
        Command::Import { csv, map, out } => {
            let sum = import_files(&csv, &map, &out).map_err(|e| e.to_string())?;
            outln!(
                "imported {} rows: {} frames, {} notes, {} contacts, {} bytes -> {}",
                sum.rows,
                sum.frames,
                sum.notes,
                sum.contacts,
                sum.bytes,
                out.display()
            );
            outln!(
                "missing: ports in {} rows ({} single port cells as NaN), pose in {} rows, joints in {} rows",
                sum.rows_without_ports,
                sum.missing_port_cells,
                sum.rows_without_pose,
                sum.rows_without_joints
            );
            Ok(ExitCode::SUCCESS)
        }
        Command::World { family, seed, out } => world_command(&family, seed, out.as_deref()),
        Command::Worlds => {
            use replay::sim::worlds::{COMMON_KEYS, Family};
            for f in Family::ALL {
                outln!("world:{:<17} {}", f.name(), f.summary());
                outln!("{:<23} draws {}", "", f.keys().join(", "));
            }
            outln!("every family also draws {}", COMMON_KEYS.join(", "));
            Ok(ExitCode::SUCCESS)
        }
        Command::Scorecard {
            families,
            worlds,
            first_seed,
            threads,
            shard,
            out,
            max_time,
            quiet,
        } => scorecard_command(
            &families,
            worlds,
            first_seed,
            threads,
            shard.as_deref(),
            &out,
            max_time,
            quiet,
        ),
        Command::Scenarios => {
            for (key, text) in replay::sim::demos::DEMOS {
                let desc = replay::sim::scenario::Scenario::from_toml_str(text)
                    .map(|s| s.description)
                    .unwrap_or_default();
                outln!("demo:{key:<18} {desc}");
            }
            Ok(ExitCode::SUCCESS)
        }
        Command::Demo {
            name,
            seed,
            out,
            max_time,
        } => {
            let input = format!("demo:{name}");
            let sim = build_sim(&input, seed).map_err(|e| e.to_string())?;
            let trace_path = out.join("trace.jsonl");
            let trace = create(&trace_path)?;
            let opts = LiveOptions {
                max_time_s: max_time,
                ..LiveOptions::default()
            };
            let (res, _) = run_live::<_, std::io::Sink>(&input, sim, trace, None, &opts)
                .map_err(|e| e.to_string())?;
            print_summary(&res.summary);
            let summary_path = out.join("summary.json");
            write_json(&summary_path, &res.summary)?;
            let svg_path = out.join("plot.svg");
            std::fs::write(&svg_path, replay::plot::render_svg(&res.scene))
                .map_err(|e| format!("{}: {e}", svg_path.display()))?;
            outln!(
                "wrote        {}, {}, {}",
                trace_path.display(),
                summary_path.display(),
                svg_path.display()
            );
            Ok(ExitCode::SUCCESS)
        }
        Command::Generate {
            scenario,
            seed,
            out,
            max_time,
        } => {
            let sim = build_sim(&scenario, seed).map_err(|e| e.to_string())?;
            let header = header_for(&sim, &scenario);
            let writer = LogWriter::new(create(&out)?, &header).map_err(|e| e.to_string())?;
            let opts = LiveOptions {
                max_time_s: max_time,
                scene_every: 0,
            };
            let (res, w) = run_live(&scenario, sim, std::io::sink(), Some(writer), &opts)
                .map_err(|e| e.to_string())?;
            if let Some(mut w) = w {
                w.flush().map_err(|e| format!("{}: {e}", out.display()))?;
            }
            outln!(
                "wrote {} frames to {} ({}); trace digest {}",
                res.summary.trace.steps,
                out.display(),
                res.summary.outcome,
                res.summary.trace.trace_digest
            );
            Ok(ExitCode::SUCCESS)
        }
        Command::Run {
            input,
            seed,
            trace,
            summary,
            salvage,
            max_time,
        } => {
            if !input.starts_with("demo:")
                && !input.starts_with("world:")
                && !std::path::Path::new(&input).exists()
            {
                return Err(format!("{input}: no such file"));
            }
            let trace_w = create(&trace)?;
            let s = if is_log(&input) {
                let f = std::fs::File::open(&input).map_err(|e| format!("{input}: {e}"))?;
                run_log(
                    &input,
                    std::io::BufReader::with_capacity(1 << 16, f),
                    trace_w,
                    salvage,
                )
                .map_err(|e| format!("{input}: {e}"))?
            } else {
                let sim = build_sim(&input, seed).map_err(|e| e.to_string())?;
                let opts = LiveOptions {
                    max_time_s: max_time,
                    scene_every: 0,
                };
                run_live::<_, std::io::Sink>(&input, sim, trace_w, None, &opts)
                    .map_err(|e| e.to_string())?
                    .0
                    .summary
            };
            write_json(&summary, &s)?;
            print_summary(&s);
            Ok(ExitCode::SUCCESS)
        }
        Command::Campaign {
            scenarios,
            seeds,
            first_seed,
            threads,
            shard,
            out,
            max_time,
            quiet,
        } => {
            use replay::campaign::{
                CampaignPlan, Shard, format_table, run, summarise, write_results,
            };
            let shard = match shard {
                Some(t) => Shard::parse(&t)?,
                None => Shard::ALL,
            };
            let plan = CampaignPlan {
                scenarios,
                first_seed,
                seeds,
            };
            let jobs = plan.jobs(shard).len() as u64;
            let bar = if quiet {
                indicatif::ProgressBar::hidden()
            } else {
                indicatif::ProgressBar::new(jobs)
            };
            bar.set_style(
                indicatif::ProgressStyle::with_template(
                    "{bar:40} {pos}/{len} runs  {elapsed} elapsed, {eta} left",
                )
                .map_err(|e| e.to_string())?,
            );
            let started = std::time::Instant::now();
            let results = run(
                &plan,
                shard,
                threads,
                |job| replay::run::campaign_job(job, max_time),
                || bar.inc(1),
            )?;
            bar.finish_and_clear();
            let mut w = create(&out)?;
            write_results(&mut w, &plan, shard, &results).map_err(|e| e.to_string())?;
            w.flush().map_err(|e| format!("{}: {e}", out.display()))?;
            let wall = started.elapsed().as_secs_f64();
            if shard == Shard::ALL {
                out!("{}", format_table(&summarise(&plan, &results)));
                print_failures(&results, max_time);
            }
            outln!(
                "{} runs in {wall:.1} s wall time; results in {}",
                results.len(),
                out.display()
            );
            Ok(ExitCode::SUCCESS)
        }
        Command::Merge { files, out } => {
            use replay::campaign::{
                Shard, format_table, merge, read_results, summarise, write_results,
            };
            let mut shards = Vec::new();
            for f in &files {
                let file = std::fs::File::open(f).map_err(|e| format!("{}: {e}", f.display()))?;
                shards.push(read_results(
                    std::io::BufReader::new(file),
                    &f.display().to_string(),
                )?);
            }
            let (plan, results) = merge(shards)?;
            if plan.scenarios.iter().all(|s| s.starts_with("world:")) {
                print_scorecard(&plan, &results, None);
            } else {
                out!("{}", format_table(&summarise(&plan, &results)));
                print_failures(&results, None);
            }
            if let Some(out) = out {
                let mut w = create(&out)?;
                write_results(&mut w, &plan, Shard::ALL, &results).map_err(|e| e.to_string())?;
                w.flush().map_err(|e| format!("{}: {e}", out.display()))?;
            }
            Ok(ExitCode::SUCCESS)
        }
        Command::Plot {
            input,
            seed,
            out,
            max_time,
        } => {
            let sim = build_sim(&input, seed).map_err(|e| e.to_string())?;
            let opts = LiveOptions {
                max_time_s: max_time,
                ..LiveOptions::default()
            };
            let (res, _) = run_live::<_, std::io::Sink>(&input, sim, std::io::sink(), None, &opts)
                .map_err(|e| e.to_string())?;
            let mut w = create(&out)?;
            w.write_all(replay::plot::render_svg(&res.scene).as_bytes())
                .and_then(|()| w.flush())
                .map_err(|e| format!("{}: {e}", out.display()))?;
            outln!(
                "{}: {}; wrote {}",
                input,
                res.summary.outcome,
                out.display()
            );
            Ok(ExitCode::SUCCESS)
        }
    }
}

/// The failing runs, each with the one command that reruns it (with the
/// campaign's time limit, when it had one; merged shards do not record it).
/// `replay world`: generate, write, and say what was drawn (on standard
/// error when the file goes to standard output).
fn world_command(
    family: &str,
    seed: u64,
    out: Option<&std::path::Path>,
) -> Result<ExitCode, String> {
    use replay::sim::worlds::{WorldSpec, generate};
    let spec = WorldSpec::parse(family).map_err(|e| e.to_string())?;
    let (world, sim) = generate(&spec, seed).map_err(|e| e.to_string())?;
    let about = format!(
        "{}: {}; true path {:.1} m; drawn {}",
        world.scenario.name,
        world.scenario.description,
        sim.true_path().map_or(f64::NAN, |p| p.length_m),
        world.parameter_text()
    );
    match out {
        Some(path) => {
            let mut w = create(path)?;
            w.write_all(world.toml.as_bytes())
                .and_then(|()| w.flush())
                .map_err(|e| format!("{}: {e}", path.display()))?;
            outln!("{about}");
            outln!("wrote {}", path.display());
        }
        None => {
            out!("{}", world.toml);
            eprintln!("{about}");
        }
    }
    Ok(ExitCode::SUCCESS)
}

/// `replay scorecard`: a campaign over `world:` scenarios and its rows.
#[allow(clippy::too_many_arguments)]
fn scorecard_command(
    families: &[String],
    worlds: u64,
    first_seed: u64,
    threads: usize,
    shard: Option<&str>,
    out: &std::path::Path,
    max_time: Option<f64>,
    quiet: bool,
) -> Result<ExitCode, String> {
    use replay::campaign::{CampaignPlan, Shard, run, write_results};
    use replay::sim::worlds::{Family, WorldSpec};
    if worlds == 0 {
        return Err("--worlds 0: nothing to run".into());
    }
    let names: Vec<String> = if families.is_empty() {
        Family::ALL.iter().map(|f| f.name().to_string()).collect()
    } else {
        families.to_vec()
    };
    let mut scenarios = Vec::with_capacity(names.len());
    for n in &names {
        let spec = WorldSpec::parse(n).map_err(|e| e.to_string())?;
        scenarios.push(format!("world:{}", spec.text()));
    }
    let shard = match shard {
        Some(t) => Shard::parse(t)?,
        None => Shard::ALL,
    };
    let plan = CampaignPlan {
        scenarios,
        first_seed,
        seeds: worlds,
    };
    let jobs = plan.jobs(shard).len() as u64;
    let bar = if quiet {
        indicatif::ProgressBar::hidden()
    } else {
        indicatif::ProgressBar::new(jobs)
    };
    bar.set_style(
        indicatif::ProgressStyle::with_template(
            "{bar:40} {pos}/{len} worlds  {elapsed} elapsed, {eta} left",
        )
        .map_err(|e| e.to_string())?,
    );
    let started = std::time::Instant::now();
    let results = run(
        &plan,
        shard,
        threads,
        |job| replay::run::campaign_job(job, max_time),
        || bar.inc(1),
    )?;
    bar.finish_and_clear();
    let mut w = create(out)?;
    write_results(&mut w, &plan, shard, &results).map_err(|e| e.to_string())?;
    w.flush().map_err(|e| format!("{}: {e}", out.display()))?;
    if shard == Shard::ALL {
        print_scorecard(&plan, &results, max_time);
    }
    outln!(
        "{} worlds in {:.1} s wall time; results in {}",
        results.len(),
        started.elapsed().as_secs_f64(),
        out.display()
    );
    Ok(ExitCode::SUCCESS)
}

/// The scorecard rows, their machine-readable lines and the failing worlds.
fn print_scorecard(
    plan: &replay::campaign::CampaignPlan,
    results: &[replay::campaign::SeedResult],
    max_time: Option<f64>,
) {
    use replay::scorecard::{format_table, machine_line, rerun_commands, rows};
    let rows = rows(plan, results);
    out!("{}", format_table(&rows));
    for r in &rows {
        outln!("{}", machine_line(r));
    }
    let failing: usize = rows.iter().map(|r| r.failing.len()).sum();
    if failing > 0 {
        outln!("failing worlds ({failing}), each regenerated and rerun by:");
        for (r, s) in rows.iter().zip(&plan.scenarios) {
            for (seed, why) in &r.failing {
                outln!("  {}    # {why}", rerun_commands(s, *seed, max_time));
            }
        }
    }
}

fn print_failures(results: &[replay::campaign::SeedResult], max_time: Option<f64>) {
    let limit = max_time.map_or(String::new(), |t| format!(" --max-time {t}"));
    let failing: Vec<_> = results
        .iter()
        .filter(|r| !r.reached || r.wall_strikes > 0)
        .collect();
    if failing.is_empty() {
        return;
    }
    outln!("failing runs ({}), each rerun by:", failing.len());
    for r in failing {
        outln!(
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
