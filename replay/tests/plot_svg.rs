//! The pictures, checked by parsing them: `replay plot` of a simulated demo
//! and of a recorded log give well-formed SVG whose expected elements exist
//! and lie inside the view box.

use std::path::Path;
use std::process::Command;

/// One element of the SVG: its name and attributes.
#[derive(Debug)]
struct Element {
    name: String,
    attrs: Vec<(String, String)>,
}

impl Element {
    fn attr(&self, k: &str) -> Option<&str> {
        self.attrs
            .iter()
            .find(|(n, _)| n == k)
            .map(|(_, v)| v.as_str())
    }
    fn num(&self, k: &str) -> Option<f64> {
        self.attr(k).map(|v| v.parse().expect("a number"))
    }
}

/// A small parser for the SVG this crate writes: elements, attributes in
/// double quotes, text, no comments or CDATA. Panics on anything
/// malformed, and checks that every element is closed in order.
fn parse(svg: &str) -> Vec<Element> {
    let mut out = Vec::new();
    let mut open: Vec<String> = Vec::new();
    let mut rest = svg;
    while let Some(start) = rest.find('<') {
        let end = rest[start..].find('>').expect("tag closed") + start;
        let tag = &rest[start + 1..end];
        rest = &rest[end + 1..];
        if let Some(name) = tag.strip_prefix('/') {
            assert_eq!(
                open.pop().as_deref(),
                Some(name.trim()),
                "closing tag order"
            );
            continue;
        }
        let self_closing = tag.ends_with('/');
        let tag = tag.trim_end_matches('/');
        let (name, mut a) = tag.split_once(' ').unwrap_or((tag, ""));
        let mut attrs = Vec::new();
        loop {
            a = a.trim_start();
            if a.is_empty() {
                break;
            }
            let (k, v) = a.split_once("=\"").expect("attribute");
            let close = v.find('"').expect("attribute value closed");
            attrs.push((k.trim().to_string(), v[..close].to_string()));
            a = &v[close + 1..];
        }
        if !self_closing {
            open.push(name.to_string());
        }
        out.push(Element {
            name: name.to_string(),
            attrs,
        });
    }
    assert!(open.is_empty(), "unclosed elements: {open:?}");
    out
}

/// Every coordinate an element carries, as (x, y) pairs.
fn points(e: &Element) -> Vec<(f64, f64)> {
    let mut v = Vec::new();
    if let (Some(x), Some(y)) = (e.num("x"), e.num("y")) {
        v.push((x, y));
        if let (Some(w), Some(h)) = (e.num("width"), e.num("height")) {
            v.push((x + w, y + h));
        }
    }
    if let (Some(x), Some(y)) = (e.num("cx"), e.num("cy")) {
        v.push((x, y));
    }
    if let Some(p) = e.attr("points") {
        for pair in p.split_whitespace() {
            let (x, y) = pair.split_once(',').expect("x,y");
            v.push((x.parse().expect("x"), y.parse().expect("y")));
        }
    }
    v
}

fn plot(input: &str, name: &str, extra: &[&str]) -> (String, Vec<Element>) {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join("replay-plot");
    let svg_path = dir.join(name);
    let out = Command::new(env!("CARGO_BIN_EXE_replay"))
        .current_dir(env!("CARGO_MANIFEST_DIR"))
        .args(["plot", input, "-o", svg_path.to_str().expect("utf-8")])
        .args(extra)
        .output()
        .expect("run replay");
    let stdout = String::from_utf8(out.stdout).expect("utf-8");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let svg = std::fs::read_to_string(&svg_path).expect("svg written");
    (stdout, parse(&svg))
}

fn check_inside_view_box(els: &[Element]) {
    let root = els.first().expect("root");
    assert_eq!(root.name, "svg");
    let vb: Vec<f64> = root
        .attr("viewBox")
        .expect("viewBox")
        .split(' ')
        .map(|v| v.parse().expect("number"))
        .collect();
    let (w, h) = (vb[2], vb[3]);
    for e in &els[1..] {
        if e.attr("width") == Some("100%") {
            continue;
        }
        for (x, y) in points(e) {
            assert!(
                (vb[0]..=w + 0.5).contains(&x) && (vb[1]..=h + 0.5).contains(&y),
                "{} at ({x}, {y}) outside the view box {w} x {h}",
                e.name
            );
        }
    }
}

fn count(els: &[Element], name: &str, class: &str) -> usize {
    els.iter()
        .filter(|e| e.name == name && e.attr("class") == Some(class))
        .count()
}

#[test]
fn scenario_plot_has_its_views_nodes_end_and_time_strip() {
    let (stdout, els) = plot("demo:wrens-slot", "wrens.svg", &["--max-time", "30"]);
    assert!(stdout.contains("wrote"), "{stdout}");
    check_inside_view_box(&els);
    assert_eq!(count(&els, "polyline", "path"), 2, "path in both views");
    assert_eq!(count(&els, "path", "end"), 2, "end marked in both views");
    assert!(
        count(&els, "rect", "node") >= 4,
        "source and exits labelled"
    );
    assert_eq!(
        count(&els, "polyline", "series") + count(&els, "text", "no-data"),
        3,
        "speed, q, standoff (drawn, or said to be unknown)"
    );
    assert!(count(&els, "polyline", "series") >= 2, "speed and q drawn");
    assert!(count(&els, "rect", "band") >= 2, "mode and reason bands");
    // The path is drawn after (above) every flow arrow and wall.
    let last_path = els
        .iter()
        .rposition(|e| e.attr("class") == Some("path"))
        .expect("path");
    let last_arrow = els
        .iter()
        .rposition(|e| e.name == "path" && e.attr("stroke") == Some("#2e8b57"));
    assert!(
        last_arrow.is_none_or(|a| a < last_path),
        "arrows under the path"
    );
}

#[test]
fn log_plot_draws_the_odometry_path_without_true_walls() {
    let (_, els) = plot("../fixtures/logs/kettle-7-12s.upl", "kettle-log.svg", &[]);
    check_inside_view_box(&els);
    assert_eq!(count(&els, "polyline", "path"), 2);
    assert_eq!(
        count(&els, "polyline", "series") + count(&els, "text", "no-data"),
        3
    );
    assert!(
        !els.iter().any(|e| e.attr("stroke") == Some("#6b5b45")),
        "no true walls from a log"
    );
    assert!(count(&els, "rect", "band") >= 2, "mode and reason bands");
    assert_eq!(count(&els, "path", "end"), 2, "end of log marked");
}

#[test]
fn trace_plot_is_its_time_strip() {
    let (stdout, els) = plot(
        "../fixtures/golden/wrens-3-10s.jsonl",
        "wrens-trace.svg",
        &[],
    );
    assert!(stdout.contains("steps drawn as a time strip"), "{stdout}");
    check_inside_view_box(&els);
    assert!(count(&els, "polyline", "series") >= 2, "speed and q drawn");
    assert!(count(&els, "rect", "band") >= 2, "mode and reason bands");
    let titles = els.iter().filter(|e| e.name == "title").count();
    assert!(titles >= 2, "bands carry their names");
}
