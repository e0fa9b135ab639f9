//! The command line's exit codes and messages, run as a program.

use std::path::{Path, PathBuf};
use std::process::Command;

fn replay(args: &[&str]) -> (i32, String, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_replay"))
        .args(args)
        .output()
        .unwrap();
    (
        out.status.code().unwrap(),
        String::from_utf8(out.stdout).unwrap(),
        String::from_utf8(out.stderr).unwrap(),
    )
}

fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("..")
}

fn scratch(name: &str) -> PathBuf {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join("replay-cli");
    std::fs::create_dir_all(&dir).unwrap();
    dir.join(name)
}

#[test]
fn import_then_inspect_then_damage() {
    let csv = root().join("fixtures/rig/demo_rig.csv");
    let map = root().join("fixtures/rig/demo_rig.toml");
    let log = scratch("demo_rig.upl");
    let (code, out, err) = replay(&[
        "import",
        csv.to_str().unwrap(),
        "--map",
        map.to_str().unwrap(),
        "-o",
        log.to_str().unwrap(),
    ]);
    assert_eq!(code, 0, "{err}");
    assert!(out.starts_with("imported 10 rows: 10 frames"), "{out}");

    let (code, out, _) = replay(&["inspect", log.to_str().unwrap()]);
    assert_eq!(code, 0);
    assert!(out.contains("records: 10 frames"), "{out}");
    let (code, out, _) = replay(&["inspect", "--json", log.to_str().unwrap()]);
    assert_eq!(code, 0);
    let v: serde_json::Value = serde_json::from_str(&out).unwrap();
    assert_eq!(v["counts"]["frames"], 10);

    let mut bytes = std::fs::read(&log).unwrap();
    let n = bytes.len();
    bytes[n - 100] ^= 0x20;
    let bad = scratch("demo_rig_damaged.upl");
    std::fs::write(&bad, &bytes).unwrap();
    let (code, out, _) = replay(&["inspect", bad.to_str().unwrap()]);
    assert_eq!(code, 1, "damage found: exit 1");
    assert!(out.contains("damage: 1 place,"), "{out}");

    let (code, _, err) = replay(&["inspect", csv.to_str().unwrap()]);
    assert_eq!(code, 2);
    assert!(err.contains("not an Upcurrent log"), "{err}");
}

#[test]
fn import_error_names_the_mapping_line() {
    let csv = root().join("fixtures/rig/demo_rig.csv");
    let text = std::fs::read_to_string(root().join("fixtures/rig/demo_rig.toml")).unwrap();
    let map = scratch("bad_map.toml");
    std::fs::write(&map, text.replace("unit = \"kPa\"", "unit = \"kPascal\"")).unwrap();
    let log = scratch("never.upl");
    let (code, _, err) = replay(&[
        "import",
        csv.to_str().unwrap(),
        "--map",
        map.to_str().unwrap(),
        "-o",
        log.to_str().unwrap(),
    ]);
    assert_eq!(code, 2);
    let line = text.lines().position(|l| l.contains("\"kPa\"")).unwrap() + 1;
    assert!(
        err.contains(&format!("bad_map.toml:{line}: unknown pressure unit")),
        "{err}"
    );
}

#[test]
fn diff_exit_codes() {
    let a = scratch("a.jsonl");
    let b = scratch("b.jsonl");
    let c = scratch("c.jsonl");
    std::fs::write(&a, "{\"t\": 0, \"h\": 0.5}\n{\"t\": 1, \"h\": 0.5}\n").unwrap();
    std::fs::write(&b, "{\"t\": 0, \"h\": 0.5}\n{\"t\": 1, \"h\": 0.5001}\n").unwrap();
    std::fs::write(&c, "{\"t\": 0, \"h\": 0.5}\n{\"t\": 1 \"h\": 0.5}\n").unwrap();
    let (a, b, c) = (
        a.to_str().unwrap(),
        b.to_str().unwrap(),
        c.to_str().unwrap(),
    );
    assert_eq!(replay(&["diff", a, a]).0, 0);
    let (code, out, _) = replay(&["diff", a, b]);
    assert_eq!(code, 1);
    assert!(out.contains("first divergence at step 1"), "{out}");
    assert!(out.contains("h: 0.5 vs 0.5001"), "{out}");
    assert_eq!(replay(&["diff", a, b, "--abs-tol", "1e-3"]).0, 0);
    assert_eq!(replay(&["diff", a, b, "--rel-tol", "1e-4"]).0, 1);
    let (code, _, err) = replay(&["diff", a, c]);
    assert_eq!(code, 2);
    assert!(err.contains("c.jsonl:2:9: not JSON"), "{err}");
    assert_eq!(replay(&["diff", a]).0, 2, "usage error");
}

/// A reader that stops early (`replay ... | head`) closes the pipe; the
/// program must stop quietly with the SIGPIPE status, not panic.
#[test]
fn a_closed_standard_output_ends_quietly() {
    for args in [
        &["scenarios"][..],
        &["inspect", "../fixtures/logs/kettle-7-12s.upl"][..],
    ] {
        let (reader, writer) = std::io::pipe().unwrap();
        drop(reader);
        let out = Command::new(env!("CARGO_BIN_EXE_replay"))
            .current_dir(env!("CARGO_MANIFEST_DIR"))
            .args(args)
            .stdout(writer)
            .stderr(std::process::Stdio::piped())
            .output()
            .unwrap();
        let err = String::from_utf8(out.stderr).unwrap();
        assert!(!err.contains("panicked"), "{args:?}: {err}");
        assert_eq!(out.status.code(), Some(141), "{args:?}: {err}");
    }
}
