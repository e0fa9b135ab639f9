//! The `demo`, `run`, `diff`, `campaign` and `merge` commands run as a
//! program: outputs, printed digests, exit codes, and error messages that
//! name the file at fault.

use std::path::{Path, PathBuf};
use std::process::Command;

/// Trace digest of `replay run demo:wrens-slot --seed 11 --max-time 3`;
/// the same constant as `WRENS_11_3S_DIGEST` in
/// `tests/tests/replay_determinism.rs` (update both together, by the rule
/// written there).
const WRENS_11_3S_DIGEST: &str = "1ee0f671a4b2b39d";

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

fn fixtures() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../fixtures")
}

fn scratch(name: &str) -> PathBuf {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join("replay-cli-run");
    std::fs::create_dir_all(&dir).expect("scratch dir");
    dir.join(name)
}

fn s(p: &Path) -> &str {
    p.to_str().expect("utf-8 path")
}

fn printed_digest(out: &str) -> Option<&str> {
    out.lines()
        .find_map(|l| l.strip_prefix("digest"))
        .map(str::trim)
}

#[test]
fn demo_writes_trace_summary_and_plot() {
    let dir = scratch("demo-kettle");
    let _ = std::fs::remove_dir_all(&dir);
    // The whole demo takes ~25 s in a debug build; 20 s of it shows the same.
    let (code, out, err) = replay(&[
        "demo",
        "hollow-kettle",
        "--out",
        s(&dir),
        "--max-time",
        "20",
    ]);
    assert_eq!(code, 0, "{err}");
    assert!(out.contains("scenario     Hollow Kettle"), "{out}");
    let trace = std::fs::read_to_string(dir.join("trace.jsonl")).expect("trace.jsonl");
    let first: serde_json::Value =
        serde_json::from_str(trace.lines().next().expect("a line")).expect("JSON line");
    assert_eq!(first["step"], 0);
    assert!(first["command"]["record"].is_object());
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("summary.json")).expect("summary"))
            .expect("summary JSON");
    assert_eq!(
        summary["trace"]["steps"].as_u64(),
        Some(trace.lines().count() as u64)
    );
    assert_eq!(
        printed_digest(&out),
        summary["trace"]["trace_digest"].as_str()
    );
    let svg = std::fs::read_to_string(dir.join("plot.svg")).expect("plot.svg");
    let svg = svg.trim();
    assert!(
        svg.starts_with("<svg") || svg.starts_with("<?xml"),
        "{}",
        &svg[..60]
    );
    assert!(svg.contains("<svg"), "svg start tag");
    assert!(svg.ends_with("</svg>"), "svg end tag");
    assert!(svg.contains(">top view"), "top panel");
    assert!(svg.contains(">side view"), "side panel");
}

#[test]
fn run_on_a_fixture_prints_the_golden_digest() {
    let stem = "kettle-7-12s";
    let golden: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(fixtures().join(format!("golden/{stem}.summary.json")))
            .expect("golden summary"),
    )
    .expect("JSON");
    let trace = scratch("kettle.jsonl");
    let (code, out, err) = replay(&[
        "run",
        s(&fixtures().join(format!("logs/{stem}.upl"))),
        "--trace",
        s(&trace),
        "--summary",
        s(&scratch("kettle.summary.json")),
    ]);
    assert_eq!(code, 0, "{err}");
    assert_eq!(
        printed_digest(&out),
        golden["trace"]["trace_digest"].as_str(),
        "{out}"
    );
}

#[test]
fn run_of_a_fixed_demo_in_a_separate_process_has_the_committed_digest() {
    let (code, out, err) = replay(&[
        "run",
        "demo:wrens-slot",
        "--seed",
        "11",
        "--max-time",
        "3",
        "--trace",
        s(&scratch("wrens11.jsonl")),
        "--summary",
        s(&scratch("wrens11.summary.json")),
    ]);
    assert_eq!(code, 0, "{err}");
    assert_eq!(printed_digest(&out), Some(WRENS_11_3S_DIGEST), "{out}");
}

#[test]
fn diff_of_a_golden_against_itself_and_a_mutated_copy() {
    let golden = fixtures().join("golden/wrens-3-10s.jsonl");
    let (code, out, _) = replay(&["diff", s(&golden), s(&golden)]);
    assert_eq!(code, 0, "{out}");
    assert!(out.starts_with("same: 1001 steps compared"), "{out}");

    let text = std::fs::read_to_string(&golden).expect("golden");
    let mutated: Vec<String> = text
        .lines()
        .enumerate()
        .map(|(i, l)| {
            if i == 420 {
                let v: serde_json::Value = serde_json::from_str(l).expect("JSON");
                let mut v = v;
                let h = v["command"]["heading_map"][0].as_f64().expect("heading");
                v["command"]["heading_map"][0] = serde_json::json!(h + 1e-9);
                v.to_string()
            } else {
                l.to_string()
            }
        })
        .collect();
    let copy = scratch("wrens-mutated.jsonl");
    std::fs::write(&copy, mutated.join("\n") + "\n").expect("write");
    let (code, out, _) = replay(&["diff", s(&golden), s(&copy)]);
    assert_eq!(code, 1, "{out}");
    assert!(out.contains("1 of 1001 steps diverge"), "{out}");
    assert!(out.contains("first divergence at step 420"), "{out}");
    assert!(out.contains("command.heading_map[0]"), "{out}");
}

#[test]
fn campaign_then_merge() {
    let whole = scratch("camp-all.jsonl");
    let (code, out, err) = replay(&[
        "campaign",
        "--scenario",
        "demo:hollow-kettle",
        "--seeds",
        "3",
        "--max-time",
        "5",
        "--quiet",
        "-o",
        s(&whole),
    ]);
    assert_eq!(code, 0, "{err}");
    assert!(out.contains("3 runs in"), "{out}");
    let mut parts = Vec::new();
    for i in 0..2 {
        let p = scratch(&format!("camp-{i}of2.jsonl"));
        let shard = format!("{i}/2");
        let (code, _, err) = replay(&[
            "campaign",
            "--scenario",
            "demo:hollow-kettle",
            "--seeds",
            "3",
            "--max-time",
            "5",
            "--quiet",
            "--shard",
            &shard,
            "-o",
            s(&p),
        ]);
        assert_eq!(code, 0, "{err}");
        parts.push(p);
    }
    let merged = scratch("camp-merged.jsonl");
    let (code, out, err) = replay(&["merge", s(&parts[1]), s(&parts[0]), "-o", s(&merged)]);
    assert_eq!(code, 0, "{err}");
    assert!(
        out.contains("Hollow Kettle") || out.contains("hollow-kettle"),
        "{out}"
    );
    assert_eq!(
        std::fs::read_to_string(&merged).expect("merged"),
        std::fs::read_to_string(&whole).expect("whole"),
        "merged shards equal the unsharded results file"
    );
    // One shard alone is not the whole campaign.
    let (code, _, err) = replay(&["merge", s(&parts[0])]);
    assert_eq!(code, 2);
    assert!(err.contains("missing"), "{err}");
}

#[test]
fn bad_inputs_exit_2_naming_the_file() {
    let missing = scratch("no-such-log.upl");
    let (code, _, err) = replay(&[
        "run",
        s(&missing),
        "--trace",
        s(&scratch("missing.jsonl")),
        "--summary",
        s(&scratch("missing.summary.json")),
    ]);
    assert_eq!(code, 2);
    assert!(err.contains("no-such-log.upl"), "{err}");

    let (code, _, err) = replay(&["demo", "no-such-demo", "--out", s(&scratch("never"))]);
    assert_eq!(code, 2);
    assert!(err.contains("no-such-demo"), "{err}");

    let mut bytes = std::fs::read(fixtures().join("logs/drift-5-10s.upl")).expect("fixture");
    let n = bytes.len();
    bytes[n / 2] ^= 0x5a;
    let bad = scratch("drift-damaged.upl");
    std::fs::write(&bad, &bytes).expect("write");
    let trace = scratch("damaged.jsonl");
    let summary = scratch("damaged.summary.json");
    let (code, _, err) = replay(&[
        "run",
        s(&bad),
        "--trace",
        s(&trace),
        "--summary",
        s(&summary),
    ]);
    assert_eq!(code, 2, "{err}");
    assert!(err.contains("drift-damaged.upl"), "{err}");
    let (code, out, err) = replay(&[
        "run",
        s(&bad),
        "--salvage",
        "--trace",
        s(&trace),
        "--summary",
        s(&summary),
    ]);
    assert_eq!(code, 0, "salvage reads on: {err}");
    assert!(printed_digest(&out).is_some(), "{out}");
}
