//! The `world`, `worlds`, `scorecard` and `merge` commands on generated
//! worlds, run as a program: a world saved to a file runs, plots and
//! inspects by itself; the scorecard prints its rows, machine-readable
//! lines and rerun commands; shards merge to the same rows; errors exit 2
//! and say what is wrong.

use std::path::{Path, PathBuf};
use std::process::Command;

fn replay(args: &[&str]) -> (i32, String, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_replay"))
        .args(args)
        .output()
        .expect("run replay");
    (
        out.status.code().expect("exit code"),
        String::from_utf8(out.stdout).expect("utf-8"),
        String::from_utf8(out.stderr).expect("utf-8"),
    )
}

fn scratch(name: &str) -> PathBuf {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join("replay-cli-worlds");
    std::fs::create_dir_all(&dir).expect("scratch dir");
    dir.join(name)
}

fn s(p: &Path) -> &str {
    p.to_str().expect("utf-8 path")
}

#[test]
fn a_saved_world_runs_plots_and_records_by_itself() {
    let file = scratch("tight-4.toml");
    let (code, out, err) = replay(&["world", "tight", "--seed", "4", "-o", s(&file)]);
    assert_eq!(code, 0, "{out}{err}");
    assert!(out.contains("tight-4"), "{out}");
    // Standard output without -o carries the same file.
    let (code, text, _) = replay(&["world", "tight", "--seed", "4"]);
    assert_eq!(code, 0);
    assert_eq!(text, std::fs::read_to_string(&file).expect("written"));
    // It runs by itself, and `world:` runs the same world.
    let trace = scratch("tight-4.jsonl");
    let summary = scratch("tight-4.json");
    let args = |input: &str| {
        replay(&[
            "run",
            input,
            "--max-time",
            "5",
            "--trace",
            s(&trace),
            "--summary",
            s(&summary),
        ])
    };
    let (code, a, err) = args(s(&file));
    assert_eq!(code, 0, "{a}{err}");
    let (code, b, err) = replay(&[
        "run",
        "world:tight",
        "--seed",
        "4",
        "--max-time",
        "5",
        "--trace",
        s(&trace),
        "--summary",
        s(&summary),
    ]);
    assert_eq!(code, 0, "{b}{err}");
    let digest = |t: &str| {
        t.lines()
            .find(|l| l.starts_with("digest"))
            .map(str::to_string)
    };
    assert!(digest(&a).is_some());
    assert_eq!(digest(&a), digest(&b));
    let svg = scratch("tight-4.svg");
    let (code, out, err) = replay(&["plot", s(&file), "--max-time", "5", "-o", s(&svg)]);
    assert_eq!(code, 0, "{out}{err}");
    assert!(std::fs::read_to_string(&svg).expect("svg").contains("<svg"));
    let log = scratch("tight-4.upl");
    let (code, out, err) = replay(&["generate", s(&file), "--max-time", "3", "-o", s(&log)]);
    assert_eq!(code, 0, "{out}{err}");
    let (code, out, _) = replay(&["inspect", s(&log)]);
    assert_eq!(code, 0, "{out}");
}

#[test]
fn worlds_lists_every_family() {
    let (code, out, _) = replay(&["worlds"]);
    assert_eq!(code, 0);
    for f in [
        "fork",
        "narrow-strongest",
        "pinch",
        "slow",
        "tight",
        "maze",
        "hot",
        "faulted",
    ] {
        assert!(out.contains(&format!("world:{f} ")), "{f}: {out}");
    }
}

#[test]
fn bad_world_requests_exit_2_with_the_reason() {
    let (code, _, err) = replay(&["world", "lagoon"]);
    assert_eq!(code, 2);
    assert!(err.contains("lagoon") && err.contains("fork"), "{err}");
    let (code, _, err) = replay(&["world", "pinch,depth=3"]);
    assert_eq!(code, 2);
    assert!(err.contains("depth"), "{err}");
    let (code, _, err) = replay(&["scorecard", "--worlds", "0"]);
    assert_eq!(code, 2);
    assert!(err.contains("--worlds 0"), "{err}");
}

#[test]
fn scorecard_shards_merge_to_the_same_rows() {
    let whole = scratch("sc-whole.jsonl");
    let args = |out: &Path, shard: Option<&str>| {
        let mut a = vec![
            "scorecard",
            "--family",
            "fork",
            "--family",
            "hot",
            "--worlds",
            "2",
            "--max-time",
            "20",
            "--threads",
            "2",
            "--quiet",
            "-o",
        ];
        let o = s(out).to_string();
        let mut v: Vec<String> = a.drain(..).map(String::from).collect();
        v.push(o);
        if let Some(sh) = shard {
            v.push("--shard".into());
            v.push(sh.into());
        }
        let refs: Vec<&str> = v.iter().map(String::as_str).collect();
        replay(&refs)
    };
    let (code, out, err) = args(&whole, None);
    assert_eq!(code, 0, "{out}{err}");
    assert!(out.contains("scorecard family=fork worlds=2"), "{out}");
    assert!(out.contains("scorecard family=hot worlds=2"), "{out}");
    let (a, b) = (scratch("sc-0.jsonl"), scratch("sc-1.jsonl"));
    assert_eq!(args(&a, Some("0/2")).0, 0);
    assert_eq!(args(&b, Some("1/2")).0, 0);
    let (code, merged, err) = replay(&["merge", s(&a), s(&b)]);
    assert_eq!(code, 0, "{err}");
    let rows = |t: &str| -> Vec<String> {
        t.lines()
            .filter(|l| l.starts_with("scorecard "))
            .map(String::from)
            .collect()
    };
    assert_eq!(rows(&merged), rows(&out));
    assert_eq!(rows(&out).len(), 2);
}
