//! Exit codes and option checks that scripts rely on, run as a program:
//! campaigns refuse what they cannot run before running anything, shards
//! come from a scheduler's array-job variables, options that cannot apply
//! are refused, imports and inspections name what is wrong.

use std::path::{Path, PathBuf};
use std::process::Command;

fn replay_env(args: &[&str], env: &[(&str, &str)]) -> (i32, String, String) {
    let mut c = Command::new(env!("CARGO_BIN_EXE_replay"));
    c.args(args);
    for k in [
        "SLURM_ARRAY_TASK_ID",
        "SLURM_ARRAY_TASK_COUNT",
        "SLURM_ARRAY_TASK_MIN",
        "SLURM_ARRAY_TASK_MAX",
        "SLURM_ARRAY_TASK_STEP",
        "JOB_COMPLETION_INDEX",
        "UPCURRENT_SHARD_COUNT",
    ] {
        c.env_remove(k);
    }
    for (k, v) in env {
        c.env(k, v);
    }
    let out = c.output().expect("run replay");
    (
        out.status.code().expect("exit code"),
        String::from_utf8(out.stdout).expect("utf-8"),
        String::from_utf8(out.stderr).expect("utf-8"),
    )
}

fn replay(args: &[&str]) -> (i32, String, String) {
    replay_env(args, &[])
}

fn fixtures() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../fixtures")
}

fn scratch(name: &str) -> PathBuf {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join("replay-cli-options");
    std::fs::create_dir_all(&dir).expect("scratch dir");
    dir.join(name)
}

fn s(p: &Path) -> &str {
    p.to_str().expect("utf-8 path")
}

#[test]
fn campaign_refuses_what_it_cannot_run_before_running() {
    let out = scratch("never-campaign.jsonl");
    for (scenario, expect) in [
        ("demo:no-such-demo", "no-such-demo"),
        ("no/such/scenario.toml", "no/such/scenario.toml"),
    ] {
        let (code, stdout, err) = replay(&[
            "campaign",
            "--scenario",
            "demo:hollow-kettle",
            "--scenario",
            scenario,
            "--seeds",
            "50",
            "--quiet",
            "-o",
            s(&out),
        ]);
        assert_eq!(code, 2, "{err}");
        assert!(err.contains(expect), "{err}");
        assert!(stdout.is_empty(), "nothing ran: {stdout}");
        assert!(!out.exists(), "no results file");
    }
    let (code, _, err) = replay(&[
        "campaign",
        "--scenario",
        "demo:hollow-kettle",
        "--seeds",
        "0",
    ]);
    assert_eq!(code, 2, "{err}");
    assert!(err.contains("--seeds"), "{err}");
}

#[test]
fn campaign_below_the_required_success_exits_1() {
    // Two seconds is far too short to reach the source: success 0 %.
    let args = [
        "campaign",
        "--scenario",
        "demo:hollow-kettle",
        "--seeds",
        "2",
        "--max-time",
        "2",
        "--quiet",
        "-o",
    ];
    let out = scratch("short-campaign.jsonl");
    let mut a = args.to_vec();
    a.extend([s(&out), "--min-success", "50"]);
    let (code, stdout, err) = replay(&a);
    assert_eq!(code, 1, "{err}");
    assert!(stdout.contains("2 runs in"), "{stdout}");
    assert!(
        err.contains("success 0.0% is below the required 50%"),
        "{err}"
    );
    let mut a = args.to_vec();
    a.extend([s(&out), "--min-success", "0"]);
    assert_eq!(replay(&a).0, 0, "0 % required: met");
    let (code, _, err) = replay(&["merge", s(&out), "--min-success", "101"]);
    assert_eq!(code, 2, "{err}");
    let (code, _, err) = replay(&["merge", s(&out), "--min-success", "50"]);
    assert_eq!(code, 1, "{err}");
}

/// The shards of an array job, each told its place only by the variables a
/// scheduler sets, merged from their folder, equal the unsharded campaign.
#[test]
fn shards_from_scheduler_variables_merge_from_a_folder() {
    let common = [
        "campaign",
        "--scenario",
        "demo:wrens-slot",
        "--seeds",
        "3",
        "--max-time",
        "1",
        "--quiet",
    ];
    let whole = scratch("sched-whole.jsonl");
    let mut a = common.to_vec();
    a.extend(["-o", s(&whole)]);
    let (code, _, err) = replay(&a);
    assert_eq!(code, 0, "{err}");

    for (name, vars) in [
        (
            "slurm",
            vec![
                vec![
                    ("SLURM_ARRAY_TASK_ID", "1"),
                    ("SLURM_ARRAY_TASK_COUNT", "2"),
                    ("SLURM_ARRAY_TASK_MIN", "1"),
                    ("SLURM_ARRAY_TASK_MAX", "2"),
                ],
                vec![
                    ("SLURM_ARRAY_TASK_ID", "2"),
                    ("SLURM_ARRAY_TASK_COUNT", "2"),
                    ("SLURM_ARRAY_TASK_MIN", "1"),
                    ("SLURM_ARRAY_TASK_MAX", "2"),
                ],
            ],
        ),
        (
            "k8s",
            vec![
                vec![
                    ("JOB_COMPLETION_INDEX", "0"),
                    ("UPCURRENT_SHARD_COUNT", "3"),
                ],
                vec![
                    ("JOB_COMPLETION_INDEX", "1"),
                    ("UPCURRENT_SHARD_COUNT", "3"),
                ],
                vec![
                    ("JOB_COMPLETION_INDEX", "2"),
                    ("UPCURRENT_SHARD_COUNT", "3"),
                ],
            ],
        ),
    ] {
        let dir = scratch(&format!("shards-{name}"));
        let _ = std::fs::remove_dir_all(&dir);
        for (k, env) in vars.iter().enumerate() {
            let part = dir.join(format!("shard-{k}.jsonl"));
            let mut a = common.to_vec();
            a.extend(["--shard", "env", "-o", s(&part)]);
            let (code, _, err) = replay_env(&a, env);
            assert_eq!(code, 0, "{name} {k}: {err}");
            assert!(err.contains("from the"), "{err}");
        }
        let merged = scratch(&format!("merged-{name}.jsonl"));
        let (code, _, err) = replay(&["merge", s(&dir), "-o", s(&merged)]);
        assert_eq!(code, 0, "{name}: {err}");
        assert_eq!(
            std::fs::read_to_string(&merged).expect("merged"),
            std::fs::read_to_string(&whole).expect("whole"),
            "{name}"
        );
    }
    let no_env = scratch("no-env.jsonl");
    let mut a = common.to_vec();
    a.extend(["--shard", "env", "-o", s(&no_env)]);
    let (code, _, err) = replay(&a);
    assert_eq!(code, 2);
    assert!(err.contains("SLURM_ARRAY_TASK_ID"), "{err}");
}

#[test]
fn options_that_cannot_apply_are_refused() {
    let log = fixtures().join("logs/kettle-7-12s.upl");
    let dir = scratch("refused");
    for (extra, what) in [
        (["--seed", "3"], "--seed"),
        (["--max-time", "3"], "--max-time"),
    ] {
        let mut a = vec!["run", s(&log), "-o", s(&dir)];
        a.extend(extra);
        let (code, _, err) = replay(&a);
        assert_eq!(code, 2, "{err}");
        assert!(err.contains(what) && err.contains("is a log"), "{err}");
    }
    let (code, _, err) = replay(&["run", "demo:wrens-slot", "--salvage", "-o", s(&dir)]);
    assert_eq!(code, 2, "{err}");
    assert!(err.contains("--salvage"), "{err}");
    let golden = fixtures().join("golden/wrens-3-10s.jsonl");
    for bad in ["-1", "nan", "inf"] {
        let (code, _, err) = replay(&["diff", s(&golden), s(&golden), "--abs-tol", bad]);
        assert_eq!(code, 2, "{bad}: {err}");
        let (code, _, err) = replay(&["diff", s(&golden), s(&golden), "--rel-tol", bad]);
        assert_eq!(code, 2, "{bad}: {err}");
    }
    let (code, _, err) = replay(&["run", "demo:wrens-slot", "--max-time", "0", "-o", s(&dir)]);
    assert_eq!(code, 2, "{err}");
}

#[test]
fn demo_names_take_the_prefix_and_outputs_their_folders() {
    let dir = scratch("deep/demo/folder");
    let _ = std::fs::remove_dir_all(scratch("deep"));
    let (code, out, err) = replay(&["demo", "demo:wrens-slot", "-o", s(&dir), "--max-time", "1"]);
    assert_eq!(code, 0, "{err}");
    assert!(out.contains("Wren's Slot"), "{out}");
    assert!(dir.join("plot.svg").exists());
    let run_dir = scratch("deep/run/folder");
    let (code, _, err) = replay(&[
        "run",
        "demo:wrens-slot",
        "--max-time",
        "1",
        "-o",
        s(&run_dir),
    ]);
    assert_eq!(code, 0, "{err}");
    assert!(run_dir.join("trace.jsonl").exists() && run_dir.join("summary.json").exists());
}

#[test]
fn import_flags_infinite_cells_and_refuses_a_header_only_csv() {
    let csv = std::fs::read_to_string(fixtures().join("rig/demo_rig.csv")).expect("csv");
    let map = fixtures().join("rig/demo_rig.toml");
    let inf = scratch("rig-inf.csv");
    std::fs::write(&inf, csv.replacen("101.375", "inf", 1)).expect("write");
    let log = scratch("import/deep/rig-inf.upl");
    let (code, out, err) = replay(&["import", s(&inf), "--map", s(&map), "-o", s(&log)]);
    assert_eq!(code, 0, "{err}");
    let line = csv
        .lines()
        .position(|l| l.contains("101.375"))
        .expect("row")
        + 1;
    assert!(
        out.contains(&format!(
            "non-finite: 0 NaN and 1 infinite cell kept as values (first at line {line}, column \"p0\")"
        )),
        "{out}"
    );
    let (code, out, _) = replay(&["inspect", s(&log)]);
    assert_eq!(code, 0);
    assert!(out.contains("infinite values: 1"), "{out}");

    let header_only: String = csv
        .lines()
        .take_while(|l| !l.starts_with("t_ms"))
        .chain(csv.lines().find(|l| l.starts_with("t_ms")))
        .map(|l| format!("{l}\n"))
        .collect();
    let empty = scratch("rig-header-only.csv");
    std::fs::write(&empty, header_only).expect("write");
    let log = scratch("rig-header-only.upl");
    let (code, _, err) = replay(&["import", s(&empty), "--map", s(&map), "-o", s(&log)]);
    assert_eq!(code, 2, "{err}");
    assert!(err.contains("no data rows"), "{err}");
    assert!(!log.exists(), "no log left behind");
}

#[test]
fn inspect_names_file_header_damage_and_counts_bytes_after_the_end() {
    let bytes = std::fs::read(fixtures().join("logs/kettle-7-12s.upl")).expect("fixture");
    let mut bad = bytes.clone();
    bad[16] ^= 1;
    let p = scratch("header-damaged.upl");
    std::fs::write(&p, &bad).expect("write");
    let (code, _, err) = replay(&["inspect", s(&p)]);
    assert_eq!(code, 2);
    assert!(err.contains("file header damaged at byte"), "{err}");

    let mut tail = bytes.clone();
    tail.extend_from_slice(&[0x42; 1234]);
    let p = scratch("bytes-after-end.upl");
    std::fs::write(&p, &tail).expect("write");
    let (code, out, _) = replay(&["inspect", s(&p)]);
    assert_eq!(code, 1);
    assert!(
        out.contains(&format!(
            "byte {}, record 1202: bytes after the end record (1234 bytes skipped)",
            bytes.len()
        )),
        "{out}"
    );
}

#[test]
fn salvage_reports_what_it_skipped() {
    let clean = fixtures().join("logs/drift-5-10s.upl");
    let mut bytes = std::fs::read(&clean).expect("fixture");
    let n = bytes.len();
    bytes[n / 2] ^= 0x5a;
    let bad = scratch("drift-salvage.upl");
    std::fs::write(&bad, &bytes).expect("write");
    let dir = scratch("salvage-out");
    let (code, out, err) = replay(&["run", s(&bad), "--salvage", "-o", s(&dir)]);
    assert_eq!(code, 0, "{err}");
    assert!(
        err.contains("replay run: skipped 1 damaged place at this offset: "),
        "{err}"
    );
    assert!(err.contains("  byte "), "the offset is listed: {err}");
    assert!(out.contains("salvaged     1 damaged place, "), "{out}");
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("summary.json")).expect("summary"))
            .expect("JSON");
    assert_eq!(summary["salvaged"]["places"], 1);
    assert!(summary["salvaged"]["bytes_skipped"].as_u64() > Some(0));
    let offset = summary["salvaged"]["damage"][0]["offset"]
        .as_u64()
        .expect("offset");
    assert!(offset > 0 && offset <= n as u64 / 2, "{offset}");
    let outcome = summary["outcome"].as_str().expect("outcome");
    assert_eq!(outcome, "end of log, salvaged past 1 damaged place");

    let dir = scratch("salvage-clean");
    let (code, _, err) = replay(&["run", s(&clean), "--salvage", "-o", s(&dir)]);
    assert_eq!(code, 0, "{err}");
    assert!(err.is_empty(), "nothing skipped: {err}");
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("summary.json")).expect("summary"))
            .expect("JSON");
    assert_eq!(summary["outcome"], "end of log");
    assert!(summary["salvaged"].is_null());
}
