//! SVG pictures of a run: a top view (x–y) and a side view (x–z) of the
//! same scene, drawn straight to SVG text.
//!
//! The picture is self-contained (no external fonts, scripts or images) and
//! needs no C library or system font to build: it is plain text. Text uses
//! the generic `sans-serif` family, which every browser resolves.
//!
//! Everything is in map-frame metres; the two panels share one scale so
//! lengths compare across them.

use std::fmt::Write as _;

/// A labelled junction mark: where a fork was met, which branch was taken
/// and why the others were not.
#[derive(Debug, Clone, PartialEq)]
pub struct JunctionMark {
    /// Junction position, map frame, m.
    pub position_m: [f64; 3],
    /// Direction of the branch taken (unit vector), if one was.
    pub taken: Option<[f64; 3]>,
    /// Rejected branches: direction and a short reason.
    pub rejected: Vec<([f64; 3], String)>,
    /// Seen through the flow (a turn of the upstream direction), not felt:
    /// drawn dashed and labelled.
    pub seen_by_flow: bool,
}

/// An estimated cross-section: a circle of `radius_m` about `centre_m`,
/// in the plane normal to `axis`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SectionMark {
    /// Centre, map frame, m.
    pub centre_m: [f64; 3],
    /// Conduit axis (unit vector).
    pub axis: [f64; 3],
    /// Radius, m.
    pub radius_m: f64,
}

/// A flow arrow: the fused flow direction at a point, scaled by a speed.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FlowArrow {
    /// Tail of the arrow, map frame, m.
    pub position_m: [f64; 3],
    /// Unit velocity direction (the way the gas moves).
    pub direction: [f64; 3],
    /// Relative length in [0, 1].
    pub strength: f64,
}

/// What a labelled network node is.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum NodeRole {
    /// A flow source.
    Source,
    /// An exit to ambient.
    Exit,
    /// A junction only one conduit meets: a blind end.
    BlindEnd,
}

/// A labelled node of the true network.
#[derive(Debug, Clone, PartialEq)]
pub struct NodeMark {
    /// Position, map frame, m.
    pub position_m: [f64; 3],
    /// What it is.
    pub role: NodeRole,
    /// Its id in the scenario.
    pub label: String,
}

/// One moment of the time strip.
#[derive(Debug, Clone, PartialEq)]
pub struct TimeSample {
    /// Time, s.
    pub time_s: f64,
    /// Commanded speed, m/s.
    pub speed_m_per_s: f64,
    /// Fused dynamic pressure, Pa.
    pub dynamic_pressure_pa: f64,
    /// Estimated standoff (skin to wall), m, when known.
    pub standoff_m: Option<f64>,
    /// Operating mode name.
    pub mode: String,
    /// Reason code name.
    pub reason: String,
    /// Faults active (scenario faults, or failed ports and sensors).
    pub faults_active: u32,
    /// The junction record of this step's decision, summarised
    /// ([`junction_label`]), when there is one.
    pub junction: Option<String>,
}

/// One line for a junction record in the time strip: the junction, how it
/// was found, the branch taken and each other branch's status (`statuses`:
/// short names such as "entered", "dead end", "rejected: weaker flow").
#[must_use]
pub fn junction_label(
    junction: u64,
    seen_by_flow: bool,
    chosen: Option<u64>,
    statuses: &[String],
) -> String {
    let how = if seen_by_flow { "seen by flow" } else { "felt" };
    let mut out = format!("junction {junction} ({how})");
    match chosen {
        Some(c) => out.push_str(&format!(": branch {c} taken")),
        None => out.push_str(": no branch taken"),
    }
    for (k, st) in statuses.iter().enumerate() {
        if Some(k as u64) != chosen {
            out.push_str(&format!("; branch {k} {st}"));
        }
    }
    out
}

/// The short name of a branch status as the trace writes it (a string, or
/// an object whose one key is the variant).
fn status_name(v: &serde_json::Value) -> String {
    let key = match v {
        serde_json::Value::String(s) => s.clone(),
        serde_json::Value::Object(m) => {
            let k = m.keys().next().cloned().unwrap_or_default();
            match m.get(&k) {
                Some(serde_json::Value::Object(r)) => {
                    let why = r.keys().next().cloned().unwrap_or_default();
                    format!("{k}: {why}")
                }
                Some(serde_json::Value::String(c)) => format!("{k}: {c}"),
                _ => k,
            }
        }
        _ => "?".to_string(),
    };
    words(&key)
}

/// `DeadEnd: Blocked` -> `dead end: blocked`: CamelCase names as words.
fn words(s: &str) -> String {
    let mut out = String::new();
    let mut prev_lower = false;
    for ch in s.chars() {
        if ch.is_uppercase() && prev_lower {
            out.push(' ');
        }
        prev_lower = ch.is_lowercase();
        out.extend(ch.to_lowercase());
    }
    out
}

/// Everything a picture shows.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Scene {
    /// Title line.
    pub title: String,
    /// True side walls (horizontal offsets from the centreline), for the
    /// top view: each a polyline, map frame; broken where another conduit
    /// opens into this one.
    pub walls_top: Vec<Vec<[f64; 3]>>,
    /// True roof and floor (vertical offsets), for the side view.
    pub walls_side: Vec<Vec<[f64; 3]>>,
    /// Labelled nodes: sources, exits, blind ends.
    pub nodes: Vec<NodeMark>,
    /// What the path is (`true path`, `odometry path`).
    pub path_label: String,
    /// Where the run ended and how.
    pub end: Option<([f64; 3], String)>,
    /// The time strip.
    pub timeline: Vec<TimeSample>,
    /// True conduit centrelines, for orientation.
    pub centrelines: Vec<Vec<[f64; 3]>>,
    /// The head's path.
    pub path: Vec<[f64; 3]>,
    /// Estimated cross-sections.
    pub sections: Vec<SectionMark>,
    /// Flow arrows.
    pub flow: Vec<FlowArrow>,
    /// Contact (wall) points.
    pub contacts: Vec<[f64; 3]>,
    /// Junctions.
    pub junctions: Vec<JunctionMark>,
    /// Source position, if known.
    pub source_m: Option<[f64; 3]>,
    /// Start position.
    pub start_m: Option<[f64; 3]>,
}

/// Which two map axes a panel shows.
#[derive(Debug, Clone, Copy)]
enum View {
    Top,
    Side,
}

impl View {
    fn project(self, p: [f64; 3]) -> (f64, f64) {
        match self {
            Self::Top => (p[0], p[1]),
            Self::Side => (p[0], p[2]),
        }
    }
    fn label(self) -> &'static str {
        match self {
            Self::Top => "top view (x east, y north)",
            Self::Side => "side view (x east, z up)",
        }
    }
}

const PANEL_W: f64 = 640.0;
const PANEL_H: f64 = 420.0;
const MARGIN: f64 = 36.0;
const LEGEND_H: f64 = 60.0;

/// Bounding box of everything in the scene, per axis.
fn bounds(scene: &Scene) -> ([f64; 3], [f64; 3]) {
    let mut lo = [f64::INFINITY; 3];
    let mut hi = [f64::NEG_INFINITY; 3];
    let mut add = |p: &[f64; 3]| {
        for i in 0..3 {
            if p[i].is_finite() {
                lo[i] = lo[i].min(p[i]);
                hi[i] = hi[i].max(p[i]);
            }
        }
    };
    scene.walls_top.iter().flatten().for_each(&mut add);
    scene.walls_side.iter().flatten().for_each(&mut add);
    scene.nodes.iter().for_each(|n| add(&n.position_m));
    scene.centrelines.iter().flatten().for_each(&mut add);
    scene.path.iter().for_each(&mut add);
    scene.contacts.iter().for_each(&mut add);
    scene.sections.iter().for_each(|s| add(&s.centre_m));
    scene.junctions.iter().for_each(|j| add(&j.position_m));
    scene.source_m.iter().for_each(&mut add);
    scene.start_m.iter().for_each(&mut add);
    for i in 0..3 {
        if !lo[i].is_finite() || !hi[i].is_finite() {
            lo[i] = -1.0;
            hi[i] = 1.0;
        }
        if hi[i] - lo[i] < 1.0 {
            let mid = 0.5 * (hi[i] + lo[i]);
            lo[i] = mid - 0.5;
            hi[i] = mid + 0.5;
        }
        let pad = 0.05 * (hi[i] - lo[i]);
        lo[i] -= pad;
        hi[i] += pad;
    }
    (lo, hi)
}

struct Panel {
    view: View,
    x0: f64,
    y0: f64,
    scale: f64,
    lo: (f64, f64),
    hi: (f64, f64),
}

impl Panel {
    fn to_px(&self, p: [f64; 3]) -> (f64, f64) {
        let (u, v) = self.view.project(p);
        let x = self.x0 + MARGIN + (u - self.lo.0) * self.scale;
        let y = self.y0 + PANEL_H - MARGIN - (v - self.lo.1) * self.scale;
        (x, y)
    }
}

fn esc(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
}

fn polyline(out: &mut String, panel: &Panel, pts: &[[f64; 3]], style: &str) {
    if pts.len() < 2 {
        return;
    }
    out.push_str("<polyline fill=\"none\" ");
    out.push_str(style);
    out.push_str(" points=\"");
    for p in pts {
        let (x, y) = panel.to_px(*p);
        let _ = write!(out, "{x:.1},{y:.1} ");
    }
    out.push_str("\"/>\n");
}

fn arrow(out: &mut String, panel: &Panel, from: [f64; 3], dir: [f64; 3], len_m: f64, colour: &str) {
    let to = [
        from[0] + dir[0] * len_m,
        from[1] + dir[1] * len_m,
        from[2] + dir[2] * len_m,
    ];
    let (x1, y1) = panel.to_px(from);
    let (x2, y2) = panel.to_px(to);
    let (dx, dy) = (x2 - x1, y2 - y1);
    let n = libm::sqrt(dx * dx + dy * dy);
    if n < 0.5 {
        return;
    }
    let (ux, uy) = (dx / n, dy / n);
    let head = 5.0_f64.min(0.5 * n);
    let (hx1, hy1) = (
        x2 - head * ux + 0.5 * head * uy,
        y2 - head * uy - 0.5 * head * ux,
    );
    let (hx2, hy2) = (
        x2 - head * ux - 0.5 * head * uy,
        y2 - head * uy + 0.5 * head * ux,
    );
    let _ = writeln!(
        out,
        "<path d=\"M{x1:.1},{y1:.1} L{x2:.1},{y2:.1} M{hx1:.1},{hy1:.1} L{x2:.1},{y2:.1} L{hx2:.1},{hy2:.1}\" stroke=\"{colour}\" stroke-width=\"1.2\" fill=\"none\"/>"
    );
}

fn draw_panel(out: &mut String, scene: &Scene, panel: &Panel) {
    let _ = writeln!(
        out,
        "<rect x=\"{:.1}\" y=\"{:.1}\" width=\"{PANEL_W}\" height=\"{PANEL_H}\" fill=\"#fbfbf8\" stroke=\"#999\"/>",
        panel.x0, panel.y0
    );
    let _ = writeln!(
        out,
        "<text x=\"{:.1}\" y=\"{:.1}\" font-family=\"sans-serif\" font-size=\"12\" fill=\"#333\">{}</text>",
        panel.x0 + 8.0,
        panel.y0 + 16.0,
        panel.view.label()
    );
    // Scale bar: a round number of metres near a fifth of the panel.
    let span_m = (PANEL_W - 2.0 * MARGIN) / panel.scale;
    let raw = span_m / 5.0;
    let mag = libm::pow(10.0, libm::floor(libm::log10(raw)));
    let bar_m = [1.0, 2.0, 5.0, 10.0]
        .iter()
        .map(|k| k * mag)
        .find(|b| *b >= raw)
        .unwrap_or(raw);
    let bx = panel.x0 + MARGIN;
    let by = panel.y0 + PANEL_H - 12.0;
    let _ = writeln!(
        out,
        "<path d=\"M{bx:.1},{by:.1} h{:.1}\" stroke=\"#333\" stroke-width=\"2\"/><text x=\"{:.1}\" y=\"{:.1}\" font-family=\"sans-serif\" font-size=\"10\" fill=\"#333\">{bar_m} m</text>",
        bar_m * panel.scale,
        bx + bar_m * panel.scale + 6.0,
        by + 4.0
    );
    for c in &scene.centrelines {
        polyline(
            out,
            panel,
            c,
            "stroke=\"#c9c9c9\" stroke-width=\"1\" stroke-dasharray=\"4 3\"",
        );
    }
    let walls = match panel.view {
        View::Top => &scene.walls_top,
        View::Side => &scene.walls_side,
    };
    for w in walls {
        polyline(out, panel, w, "stroke=\"#6b5b45\" stroke-width=\"1.5\"");
    }
    for s in &scene.sections {
        // Draw the section as its diameter segment across the axis, in the
        // panel plane: the projection of a circle seen edge-on.
        let (u, v) = panel.view.project(s.axis);
        let n = libm::sqrt(u * u + v * v);
        let perp = if n > 1e-9 {
            match panel.view {
                View::Top => [-v / n, u / n, 0.0],
                View::Side => [-v / n, 0.0, u / n],
            }
        } else {
            [0.0, 1.0, 0.0]
        };
        let a = [
            s.centre_m[0] - perp[0] * s.radius_m,
            s.centre_m[1] - perp[1] * s.radius_m,
            s.centre_m[2] - perp[2] * s.radius_m,
        ];
        let b = [
            s.centre_m[0] + perp[0] * s.radius_m,
            s.centre_m[1] + perp[1] * s.radius_m,
            s.centre_m[2] + perp[2] * s.radius_m,
        ];
        polyline(
            out,
            panel,
            &[a, b],
            "stroke=\"#3a7bd5\" stroke-width=\"1\" stroke-opacity=\"0.6\"",
        );
    }
    for c in &scene.contacts {
        let (x, y) = panel.to_px(*c);
        let _ = writeln!(
            out,
            "<circle cx=\"{x:.1}\" cy=\"{y:.1}\" r=\"1.4\" fill=\"#d08c1f\"/>"
        );
    }
    let arrow_len = 18.0 / panel.scale;
    for f in &scene.flow {
        arrow(
            out,
            panel,
            f.position_m,
            f.direction,
            arrow_len * f.strength.clamp(0.2, 1.0),
            "#2e8b57",
        );
    }
    for j in &scene.junctions {
        let (x, y) = panel.to_px(j.position_m);
        let dash = if j.seen_by_flow {
            " stroke-dasharray=\"2,2\" class=\"flow-junction\""
        } else {
            " class=\"felt-junction\""
        };
        let _ = writeln!(
            out,
            "<rect x=\"{:.1}\" y=\"{:.1}\" width=\"8\" height=\"8\" fill=\"none\" stroke=\"#6a1b9a\" stroke-width=\"1.5\"{dash}/>",
            x - 4.0,
            y - 4.0
        );
        if j.seen_by_flow {
            let _ = writeln!(
                out,
                "<text x=\"{:.1}\" y=\"{:.1}\" font-family=\"sans-serif\" font-size=\"9\" fill=\"#6a1b9a\">seen by flow</text>",
                x - 4.0,
                y - 7.0
            );
        }
        if let Some(d) = j.taken {
            arrow(out, panel, j.position_m, d, 2.0 * arrow_len, "#6a1b9a");
        }
        for (k, (d, why)) in j.rejected.iter().enumerate() {
            arrow(out, panel, j.position_m, *d, 1.5 * arrow_len, "#999");
            let (u, v) = panel.view.project(*d);
            let (tx, ty) = (x + u * 30.0 + 4.0, y - v * 30.0 + 10.0 * k as f64);
            let _ = writeln!(
                out,
                "<text x=\"{tx:.1}\" y=\"{ty:.1}\" font-family=\"sans-serif\" font-size=\"9\" fill=\"#555\">{}</text>",
                esc(why)
            );
        }
    }
    for n in &scene.nodes {
        let (x, y) = panel.to_px(n.position_m);
        let (colour, what) = match n.role {
            NodeRole::Source => ("#b8860b", "source"),
            NodeRole::Exit => ("#1f7a8c", "exit"),
            NodeRole::BlindEnd => ("#7f7f7f", "blind end"),
        };
        let _ = writeln!(
            out,
            "<rect class=\"node\" x=\"{:.1}\" y=\"{:.1}\" width=\"7\" height=\"7\" fill=\"{colour}\"/><text x=\"{:.1}\" y=\"{:.1}\" font-family=\"sans-serif\" font-size=\"9\" fill=\"{colour}\">{what} {}</text>",
            x - 3.5,
            y - 3.5,
            x + 6.0,
            y + 12.0,
            esc(&n.label)
        );
    }
    // The path goes above everything else, so nothing hides it.
    polyline(
        out,
        panel,
        &scene.path,
        "class=\"path\" stroke=\"#c0392b\" stroke-width=\"2\"",
    );
    let mut mark = |p: Option<[f64; 3]>, label: &str, colour: &str| {
        if let Some(p) = p {
            let (x, y) = panel.to_px(p);
            let _ = writeln!(
                out,
                "<circle cx=\"{x:.1}\" cy=\"{y:.1}\" r=\"5\" fill=\"{colour}\"/><text x=\"{:.1}\" y=\"{:.1}\" font-family=\"sans-serif\" font-size=\"11\" fill=\"{colour}\">{label}</text>",
                x + 7.0,
                y - 7.0
            );
        }
    };
    mark(scene.start_m, "start", "#1f4e79");
    mark(scene.source_m, "source", "#b8860b");
    if let Some((p, outcome)) = &scene.end {
        let (x, y) = panel.to_px(*p);
        let _ = writeln!(
            out,
            "<path class=\"end\" d=\"M{:.1},{:.1} l8,8 M{:.1},{:.1} l-8,8\" stroke=\"#111\" stroke-width=\"2\"/><text x=\"{:.1}\" y=\"{:.1}\" font-family=\"sans-serif\" font-size=\"11\" fill=\"#111\">end: {}</text>",
            x - 4.0,
            y - 4.0,
            x + 4.0,
            y - 4.0,
            x + 8.0,
            y + 14.0,
            esc(outcome)
        );
    }
}

const STRIP_H: f64 = 44.0;
const BAND_H: f64 = 12.0;

/// A stable colour for a name (mode or reason), from a small palette.
fn colour_of(name: &str) -> &'static str {
    const PALETTE: [&str; 10] = [
        "#4e79a7", "#f28e2b", "#e15759", "#76b7b2", "#59a14f", "#edc948", "#b07aa1", "#ff9da7",
        "#9c755f", "#bab0ac",
    ];
    let h = name.bytes().fold(0usize, |h, b| {
        h.wrapping_mul(31).wrapping_add(usize::from(b))
    });
    PALETTE[h % PALETTE.len()]
}

/// The time strip: one line plot per quantity, then bands for mode,
/// reason and faults, over one shared time axis. Returns its height.
fn draw_timeline(out: &mut String, scene: &Scene, x0: f64, y0: f64, w: f64) -> f64 {
    let t = &scene.timeline;
    let (Some(first), Some(last)) = (t.first(), t.last()) else {
        return 0.0;
    };
    let (t0, t1) = (first.time_s, last.time_s.max(first.time_s + 1e-9));
    let left = x0 + 130.0;
    let plot_w = w - 140.0;
    let tx = |time: f64| left + (time - t0) / (t1 - t0) * plot_w;
    let mut y = y0;
    let _ = writeln!(
        out,
        "<text x=\"{x0:.1}\" y=\"{:.1}\" font-family=\"sans-serif\" font-size=\"12\" fill=\"#333\">time strip, {t0:.1} s to {t1:.1} s</text>",
        y + 12.0
    );
    y += 18.0;
    type Series = (&'static str, &'static str, fn(&TimeSample) -> Option<f64>);
    let series: [Series; 3] = [
        ("speed", "m/s", |s| Some(s.speed_m_per_s)),
        ("dynamic pressure", "Pa", |s| Some(s.dynamic_pressure_pa)),
        ("standoff", "m", |s| s.standoff_m),
    ];
    for (name, unit, get) in series {
        let vals: Vec<(f64, f64)> = t
            .iter()
            .filter_map(|s| get(s).filter(|v| v.is_finite()).map(|v| (s.time_s, v)))
            .collect();
        let hi = vals.iter().map(|v| v.1).fold(0.0_f64, f64::max);
        let lo = vals.iter().map(|v| v.1).fold(0.0_f64, f64::min);
        let span = (hi - lo).max(1e-12);
        let _ = writeln!(
            out,
            "<rect x=\"{left:.1}\" y=\"{y:.1}\" width=\"{plot_w:.1}\" height=\"{STRIP_H}\" fill=\"#fbfbf8\" stroke=\"#ccc\"/><text x=\"{x0:.1}\" y=\"{:.1}\" font-family=\"sans-serif\" font-size=\"10\" fill=\"#333\">{name}, {unit} (0 to {:.3})</text>",
            y + STRIP_H / 2.0 + 3.0,
            hi
        );
        if vals.len() >= 2 {
            let _ = write!(
                out,
                "<polyline class=\"series\" fill=\"none\" stroke=\"#333\" stroke-width=\"1\" points=\""
            );
            for (time, v) in &vals {
                let py = y + STRIP_H - (v - lo) / span * (STRIP_H - 4.0) - 2.0;
                let _ = write!(out, "{:.1},{py:.1} ", tx(*time));
            }
            out.push_str("\"/>\n");
        } else {
            let _ = writeln!(
                out,
                "<text class=\"no-data\" x=\"{:.1}\" y=\"{:.1}\" font-family=\"sans-serif\" font-size=\"10\" fill=\"#777\">not known in this run</text>",
                left + 8.0,
                y + STRIP_H / 2.0 + 3.0
            );
        }
        y += STRIP_H + 6.0;
    }
    type Band = (&'static str, fn(&TimeSample) -> Option<String>);
    let bands: [Band; 4] = [
        ("mode", |s| Some(s.mode.clone())),
        ("reason", |s| Some(s.reason.clone())),
        ("junction", |s| s.junction.clone()),
        ("faults active", |s| {
            (s.faults_active > 0).then(|| format!("{} active", s.faults_active))
        }),
    ];
    for (name, get) in bands {
        let _ = writeln!(
            out,
            "<text x=\"{x0:.1}\" y=\"{:.1}\" font-family=\"sans-serif\" font-size=\"10\" fill=\"#333\">{name}</text>",
            y + BAND_H - 2.0
        );
        let mut k = 0;
        let mut names: Vec<String> = Vec::new();
        while k < t.len() {
            let v = get(&t[k]);
            let mut e = k + 1;
            while e < t.len() && get(&t[e]) == v {
                e += 1;
            }
            if let Some(v) = v {
                let xa = tx(t[k].time_s);
                let xb = tx(t.get(e).map_or(t1, |s| s.time_s));
                let colour = if name == "faults active" {
                    "#c0392b"
                } else if name == "junction" {
                    "#6a1b9a"
                } else {
                    colour_of(&v)
                };
                let _ = writeln!(
                    out,
                    "<rect class=\"band\" x=\"{xa:.1}\" y=\"{y:.1}\" width=\"{:.1}\" height=\"{BAND_H}\" fill=\"{colour}\"><title>{}</title></rect>",
                    (xb - xa).max(0.5),
                    esc(&v)
                );
                if !names.contains(&v) {
                    names.push(v);
                }
            }
            k = e;
        }
        if name != "faults active" && name != "junction" {
            // A key under the band: each name in its colour.
            let mut kx = left;
            y += BAND_H + 2.0;
            for n in names.iter().take(8) {
                let _ = writeln!(
                    out,
                    "<rect x=\"{kx:.1}\" y=\"{y:.1}\" width=\"8\" height=\"8\" fill=\"{}\"/><text x=\"{:.1}\" y=\"{:.1}\" font-family=\"sans-serif\" font-size=\"9\" fill=\"#333\">{}</text>",
                    colour_of(n),
                    kx + 10.0,
                    y + 7.5,
                    esc(n)
                );
                kx += 18.0 + 5.2 * n.len() as f64;
            }
            y += 10.0;
        } else {
            y += BAND_H;
        }
        y += 4.0;
    }
    // Time axis ticks.
    let step = [0.5, 1.0, 2.0, 5.0, 10.0, 20.0, 50.0, 100.0, 200.0, 500.0]
        .into_iter()
        .find(|s| (t1 - t0) / s <= 10.0)
        .unwrap_or(1000.0);
    let mut tick = libm::ceil(t0 / step) * step;
    while tick <= t1 {
        let x = tx(tick);
        let _ = writeln!(
            out,
            "<text x=\"{x:.1}\" y=\"{:.1}\" font-family=\"sans-serif\" font-size=\"9\" fill=\"#555\" text-anchor=\"middle\">{tick} s</text>",
            y + 10.0
        );
        tick += step;
    }
    y + 14.0 - y0
}

/// Render the scene as a standalone SVG document.
#[must_use]
pub fn render_svg(scene: &Scene) -> String {
    let (lo, hi) = bounds(scene);
    let inner_w = PANEL_W - 2.0 * MARGIN;
    let inner_h = PANEL_H - 2.0 * MARGIN;
    // One scale for both panels: fit x, y and z spans.
    let sx = inner_w / (hi[0] - lo[0]);
    let sy = inner_h / (hi[1] - lo[1]);
    let sz = inner_h / (hi[2] - lo[2]);
    let scale = sx.min(sy).min(sz);
    let width = PANEL_W * 2.0 + 30.0;
    // Measure the time strip by drawing it once into a scratch buffer.
    let strip_y = 30.0 + PANEL_H + LEGEND_H;
    let mut strip = String::new();
    let strip_h = draw_timeline(&mut strip, scene, 14.0, strip_y, width - 28.0);
    let height = PANEL_H + LEGEND_H + 30.0 + strip_h;
    let mut out = String::with_capacity(64 * 1024 + strip.len());
    let _ = writeln!(
        out,
        "<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"{width}\" height=\"{height}\" viewBox=\"0 0 {width} {height}\">"
    );
    let _ = writeln!(out, "<rect width=\"100%\" height=\"100%\" fill=\"white\"/>");
    let _ = writeln!(
        out,
        "<text x=\"10\" y=\"20\" font-family=\"sans-serif\" font-size=\"15\" fill=\"#111\">{}</text>",
        esc(&scene.title)
    );
    let top = Panel {
        view: View::Top,
        x0: 10.0,
        y0: 30.0,
        scale,
        lo: (lo[0], lo[1]),
        hi: (hi[0], hi[1]),
    };
    let side = Panel {
        view: View::Side,
        x0: 20.0 + PANEL_W,
        y0: 30.0,
        scale,
        lo: (lo[0], lo[2]),
        hi: (hi[0], hi[2]),
    };
    let _ = (top.hi, side.hi);
    draw_panel(&mut out, scene, &top);
    draw_panel(&mut out, scene, &side);
    // Legend.
    let ly = 30.0 + PANEL_H + 22.0;
    let path_label = if scene.path_label.is_empty() {
        "path"
    } else {
        scene.path_label.as_str()
    };
    let items = [
        ("#6b5b45", "true wall"),
        ("#c0392b", path_label),
        ("#3a7bd5", "estimated cross-section"),
        ("#2e8b57", "fused flow (downstream)"),
        ("#d08c1f", "contact"),
        ("#6a1b9a", "junction / branch taken"),
        ("#999", "branch rejected (reason)"),
    ];
    let mut x = 14.0;
    for (colour, label) in items {
        let _ = writeln!(
            out,
            "<rect x=\"{x:.1}\" y=\"{:.1}\" width=\"14\" height=\"4\" fill=\"{colour}\"/><text x=\"{:.1}\" y=\"{:.1}\" font-family=\"sans-serif\" font-size=\"11\" fill=\"#333\">{label}</text>",
            ly - 4.0,
            x + 18.0,
            ly + 1.0
        );
        x += 26.0 + 6.2 * label.len() as f64;
    }
    out.push_str(&strip);
    out.push_str("</svg>\n");
    out
}

/// A scene from a decision trace (JSON Lines, as `replay run` writes): a
/// trace holds what the robot decided, not where it was, so the picture is
/// the time strip (speed, dynamic pressure, standoff, mode, reason, failed
/// ports and sensors), one sample every `every` steps.
///
/// # Errors
/// A line that is not a trace line, named by its 1-based number.
pub fn scene_of_trace<R: std::io::BufRead>(
    reader: R,
    name: &str,
    every: usize,
) -> Result<Scene, String> {
    let mut scene = Scene {
        title: format!("{name} (decision trace)"),
        ..Scene::default()
    };
    for (i, line) in reader.lines().enumerate() {
        let line = line.map_err(|e| format!("{name}:{}: {e}", i + 1))?;
        if line.trim().is_empty() || i % every.max(1) != 0 {
            continue;
        }
        let v: serde_json::Value =
            serde_json::from_str(&line).map_err(|e| format!("{name}:{}: not JSON: {e}", i + 1))?;
        let c = &v["command"];
        let num = |x: &serde_json::Value| x.as_f64();
        let (Some(time_s), Some(speed)) = (num(&c["time_s"]), num(&c["speed_m_per_s"])) else {
            return Err(format!(
                "{name}:{}: not a decision trace line (no command.time_s or speed_m_per_s)",
                i + 1
            ));
        };
        let failed = c["health"]["failed_ports"]
            .as_u64()
            .unwrap_or(0)
            .count_ones()
            + c["health"]["failed_contacts"]
                .as_u64()
                .unwrap_or(0)
                .count_ones();
        scene.timeline.push(TimeSample {
            time_s,
            speed_m_per_s: speed,
            dynamic_pressure_pa: num(&c["record"]["dynamic_pressure_pa"]).unwrap_or(f64::NAN),
            standoff_m: num(&c["record"]["standoff_m"]),
            mode: c["mode"].as_str().unwrap_or("?").to_string(),
            reason: c["record"]["reason"].as_str().unwrap_or("?").to_string(),
            faults_active: failed,
            junction: c["record"]["branch"].as_object().map(|b| {
                let n = b
                    .get("count")
                    .and_then(serde_json::Value::as_u64)
                    .unwrap_or(0);
                let field = |k: &str| {
                    b.get(k)
                        .and_then(serde_json::Value::as_array)
                        .cloned()
                        .unwrap_or_default()
                };
                let (origin, samples) = (field("origin"), field("samples"));
                let statuses: Vec<String> = field("status")
                    .iter()
                    .enumerate()
                    .take(n as usize)
                    .map(|(k, st)| {
                        let guessed = origin.get(k).and_then(serde_json::Value::as_str)
                            == Some("Guessed")
                            && samples.get(k).and_then(serde_json::Value::as_u64) == Some(0);
                        let open = matches!(st.as_str(), Some("Unexplored"))
                            || st.get("Rejected").is_some();
                        if guessed && open {
                            "guessed, not tried".to_string()
                        } else {
                            status_name(st)
                        }
                    })
                    .collect();
                junction_label(
                    b.get("junction")
                        .and_then(serde_json::Value::as_u64)
                        .unwrap_or(0),
                    b.get("seen_by_flow")
                        .and_then(serde_json::Value::as_bool)
                        .unwrap_or(false),
                    b.get("chosen").and_then(serde_json::Value::as_u64),
                    &statuses,
                )
            }),
        });
    }
    if scene.timeline.is_empty() {
        return Err(format!("{name}: no trace lines"));
    }
    Ok(scene)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn scene() -> Scene {
        Scene {
            title: "test <&> scene".into(),
            walls_top: vec![vec![[0.0, 1.0, 0.0], [10.0, 1.0, 0.0]]],
            walls_side: vec![vec![[0.0, 0.0, 1.0], [10.0, 0.0, 1.0]]],
            nodes: vec![NodeMark {
                position_m: [10.0, 0.0, 0.0],
                role: NodeRole::Source,
                label: "vent".into(),
            }],
            path_label: "true path".into(),
            end: Some(([9.0, 0.0, 0.0], "reached source".into())),
            timeline: (0..50)
                .map(|k| TimeSample {
                    time_s: f64::from(k) * 0.25,
                    speed_m_per_s: 0.2,
                    dynamic_pressure_pa: 3.0 + f64::from(k) * 0.1,
                    standoff_m: (k > 3).then_some(0.1),
                    mode: if k < 4 { "Hold" } else { "Nominal" }.into(),
                    reason: if k < 4 {
                        "HoldModeSettling"
                    } else {
                        "FollowUpstream"
                    }
                    .into(),
                    faults_active: u32::from((20..30).contains(&k)),
                    junction: (30..34).contains(&k).then(|| {
                        junction_label(2, true, Some(0), &["entered".into(), "guessed".into()])
                    }),
                })
                .collect(),
            centrelines: vec![vec![[0.0, 0.0, 0.0], [10.0, 0.0, 0.0]]],
            path: vec![[0.0, 0.0, 0.0], [5.0, 0.1, 0.2], [9.0, 0.0, 0.0]],
            sections: vec![SectionMark {
                centre_m: [5.0, 0.0, 0.0],
                axis: [1.0, 0.0, 0.0],
                radius_m: 1.0,
            }],
            flow: vec![FlowArrow {
                position_m: [2.0, 0.0, 0.0],
                direction: [-1.0, 0.0, 0.0],
                strength: 1.0,
            }],
            contacts: vec![[3.0, 1.0, 0.0]],
            junctions: vec![JunctionMark {
                position_m: [6.0, 0.0, 0.0],
                taken: Some([1.0, 0.0, 0.0]),
                rejected: vec![([0.0, 1.0, 0.0], "too narrow: 0.21 m < 0.30 m".into())],
                seen_by_flow: false,
            }],
            source_m: Some([10.0, 0.0, 0.0]),
            start_m: Some([0.0, 0.0, 0.0]),
        }
    }

    #[test]
    fn renders_every_element_and_escapes_text() {
        let svg = render_svg(&scene());
        assert!(svg.starts_with("<svg xmlns=\"http://www.w3.org/2000/svg\""));
        assert!(svg.trim_end().ends_with("</svg>"));
        assert!(svg.contains("test &lt;&amp;&gt; scene"));
        assert!(svg.contains("too narrow: 0.21 m &lt; 0.30 m"));
        // Two panels, each with the path polyline.
        assert_eq!(svg.matches("class=\"path\"").count(), 2);
        assert_eq!(svg.matches("top view").count(), 1);
        assert_eq!(svg.matches("side view").count(), 1);
        // No external references.
        assert!(!svg.contains("href"));
        assert!(!svg.contains("@import"));
    }

    /// The junction records of the decisions show in their own band of the
    /// time strip, each with its summary as the title.
    #[test]
    fn trace_statuses_read_as_words() {
        let v: serde_json::Value =
            serde_json::from_str(r#"[{"DeadEnd":"Blocked"},"Entered",{"Rejected":{"WeakerFlow":{"flux_kg_per_s":0.1}}}]"#)
                .unwrap();
        let names: Vec<String> = v.as_array().unwrap().iter().map(status_name).collect();
        assert_eq!(
            names,
            ["dead end: blocked", "entered", "rejected: weaker flow"]
        );
    }

    #[test]
    fn junction_records_show_in_the_time_strip() {
        let svg = render_svg(&scene());
        assert!(svg.contains(">junction</text>"), "no junction band");
        assert!(svg.contains(
            "<title>junction 2 (seen by flow): branch 0 taken; branch 1 guessed</title>"
        ));
        let mut s = scene();
        for t in &mut s.timeline {
            t.junction = None;
        }
        assert!(!render_svg(&s).contains("junction 2"));
    }

    /// A junction seen through the flow is drawn dashed and labelled, in
    /// both views; a felt one is not.
    #[test]
    fn junctions_seen_by_flow_are_marked_apart() {
        let felt = render_svg(&scene());
        assert_eq!(felt.matches("class=\"felt-junction\"").count(), 2);
        assert!(!felt.contains(">seen by flow</text>"));
        let mut s = scene();
        s.junctions[0].seen_by_flow = true;
        let svg = render_svg(&s);
        assert_eq!(svg.matches("class=\"flow-junction\"").count(), 2);
        assert_eq!(svg.matches(">seen by flow</text>").count(), 2);
        assert!(svg.contains("stroke-dasharray"));
    }

    #[test]
    fn same_scene_same_bytes() {
        assert_eq!(render_svg(&scene()), render_svg(&scene()));
    }

    #[test]
    fn empty_scene_is_still_a_document() {
        let svg = render_svg(&Scene::default());
        assert!(svg.contains("</svg>"));
        assert!(!svg.contains("NaN"));
        assert!(!svg.contains("inf"));
    }

    #[test]
    fn points_land_inside_their_panel() {
        let svg = render_svg(&scene());
        // Every circle centre lies within the drawing.
        for part in svg.split("<circle cx=\"").skip(1) {
            let x: f64 = part.split('"').next().unwrap().parse().unwrap();
            assert!((0.0..=PANEL_W * 2.0 + 30.0).contains(&x), "x = {x}");
        }
    }
}
