//! A world in the making: nodes, conduits, robot, sensors, faults and start
//! as plain values, written out as a scenario file (the format of
//! `replay/SCENARIOS.md`).
//!
//! Every number is written with Rust's shortest round-trip form (`{:?}` of
//! an `f64`), so the file parses back to exactly the values drawn: the
//! scenario a world generator returns is the one its file loads to (checked
//! by `tests/tests/worlds.rs::saved_worlds_load_back_identical`).

use std::fmt::Write as _;

use crate::sim::vec3::V3;

/// What a node is, in a draft.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum DraftKind {
    /// A junction or a blind end.
    Junction,
    /// An exit to ambient pressure, Pa.
    Exit(f64),
    /// A source held at a stagnation pressure, Pa.
    Reservoir(f64),
    /// A source injecting a mass flow, kg/s.
    MassFlow(f64),
}

/// A node of a draft.
#[derive(Debug, Clone, PartialEq)]
pub struct DraftNode {
    /// Id (unique in the world).
    pub id: String,
    /// Position, m.
    pub position_m: V3,
    /// Kind.
    pub kind: DraftKind,
}

/// How wide a drafted conduit is.
#[derive(Debug, Clone, PartialEq)]
pub enum DraftRadius {
    /// Constant radius, m.
    Constant(f64),
    /// `(fraction of length, radius m)` pairs, fractions 0 to 1.
    Profile(Vec<(f64, f64)>),
}

impl DraftRadius {
    /// The smallest radius, m.
    #[must_use]
    pub fn min_m(&self) -> f64 {
        match self {
            Self::Constant(r) => *r,
            Self::Profile(p) => p.iter().map(|q| q.1).fold(f64::INFINITY, f64::min),
        }
    }

    /// The largest radius, m.
    #[must_use]
    pub fn max_m(&self) -> f64 {
        match self {
            Self::Constant(r) => *r,
            Self::Profile(p) => p.iter().map(|q| q.1).fold(0.0, f64::max),
        }
    }
}

/// A conduit of a draft.
#[derive(Debug, Clone, PartialEq)]
pub struct DraftConduit {
    /// Id (unique in the world).
    pub id: String,
    /// Index of the `from` node in the draft.
    pub from: usize,
    /// Index of the `to` node.
    pub to: usize,
    /// Interior centreline vertices, m.
    pub via_m: Vec<V3>,
    /// Radius.
    pub radius: DraftRadius,
    /// Absolute wall roughness, m.
    pub roughness_m: f64,
    /// Solved as a compressible nozzle.
    pub compressible: bool,
}

/// A scheduled fault of a draft, already in scenario-file terms.
#[derive(Debug, Clone, PartialEq)]
pub struct DraftFault {
    /// `kind = "..."`.
    pub kind: &'static str,
    /// Onset, s.
    pub at_s: f64,
    /// End, s (`None`: for ever).
    pub until_s: Option<f64>,
    /// The kind's own keys, already formatted as `key = value`.
    pub keys: Vec<String>,
}

/// The robot of a draft: identical modules carrying the demos' ring layout.
#[derive(Debug, Clone, PartialEq)]
pub struct DraftRobot {
    /// Speed limit, m/s.
    pub speed_limit_m_per_s: f64,
    /// Module count.
    pub modules: u32,
    /// Module length, m.
    pub module_length_m: f64,
    /// Module radius, m.
    pub module_radius_m: f64,
    /// `"five_port"` or `"seven_port"`.
    pub probe_layout: &'static str,
    /// Probe head radius, m.
    pub head_radius_m: f64,
}

/// Probe transducer imperfections of a draft.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DraftProbeNoise {
    /// White noise per port, 1 sigma, Pa.
    pub noise_pa: f64,
    /// Per-port bias sigma, Pa.
    pub bias_sigma_pa: f64,
    /// Latency, s.
    pub latency_s: f64,
}

/// A whole world in the making.
#[derive(Debug, Clone, PartialEq)]
pub struct Draft {
    /// Scenario name.
    pub name: String,
    /// One-line description (what was drawn).
    pub description: String,
    /// Comment lines written at the top of the file.
    pub comments: Vec<String>,
    /// Seed of every noise stream.
    pub seed: u64,
    /// Run length, s.
    pub duration_s: f64,
    /// `"air"` or `"water_vapour"`.
    pub species: &'static str,
    /// Gas temperature, K.
    pub temperature_k: f64,
    /// Nodes.
    pub nodes: Vec<DraftNode>,
    /// Conduits.
    pub conduits: Vec<DraftConduit>,
    /// The robot.
    pub robot: DraftRobot,
    /// Probe noise.
    pub probe: DraftProbeNoise,
    /// Fault schedule.
    pub faults: Vec<DraftFault>,
    /// Head front-face start point, m.
    pub start_m: V3,
}

/// `[a, b, c]` with round-trip floats.
fn v3(v: V3) -> String {
    format!("[{:?}, {:?}, {:?}]", v[0], v[1], v[2])
}

/// A TOML basic string (the drafts only hold printable ASCII).
fn quoted(s: &str) -> String {
    let mut out = String::with_capacity(s.len() + 2);
    out.push('"');
    for ch in s.chars() {
        match ch {
            '"' => out.push_str("\\\""),
            '\\' => out.push_str("\\\\"),
            c if c.is_control() => out.push(' '),
            c => out.push(c),
        }
    }
    out.push('"');
    out
}

impl Draft {
    /// The scenario file text.
    #[must_use]
    pub fn to_toml(&self) -> String {
        let mut o = String::new();
        for c in &self.comments {
            let _ = writeln!(o, "# {c}");
        }
        let _ = writeln!(o, "\n[scenario]");
        let _ = writeln!(o, "name = {}", quoted(&self.name));
        let _ = writeln!(o, "description = {}", quoted(&self.description));
        let _ = writeln!(o, "seed = {}", self.seed);
        let _ = writeln!(o, "time_step_s = 0.01");
        let _ = writeln!(o, "duration_s = {:?}", self.duration_s);
        let _ = writeln!(o, "\n[gas]");
        let _ = writeln!(o, "species = {}", quoted(self.species));
        let _ = writeln!(o, "temperature_k = {:?}", self.temperature_k);
        for n in &self.nodes {
            let _ = writeln!(o, "\n[[node]]");
            let _ = writeln!(o, "id = {}", quoted(&n.id));
            let _ = writeln!(o, "position_m = {}", v3(n.position_m));
            match n.kind {
                DraftKind::Junction => {}
                DraftKind::Exit(p) => {
                    let _ = writeln!(o, "kind = \"exit\"\nambient_pressure_pa = {p:?}");
                }
                DraftKind::Reservoir(p) => {
                    let _ = writeln!(o, "kind = \"source\"\nstagnation_pressure_pa = {p:?}");
                }
                DraftKind::MassFlow(m) => {
                    let _ = writeln!(o, "kind = \"source\"\nmass_flow_kg_per_s = {m:?}");
                }
            }
        }
        for c in &self.conduits {
            self.write_conduit(&mut o, c);
        }
        self.write_robot(&mut o);
        let _ = writeln!(o, "\n[sensors.probe]");
        let _ = writeln!(o, "noise_pa = {:?}", self.probe.noise_pa);
        let _ = writeln!(o, "bias_sigma_pa = {:?}", self.probe.bias_sigma_pa);
        let _ = writeln!(o, "latency_s = {:?}", self.probe.latency_s);
        for f in &self.faults {
            let _ = writeln!(o, "\n[[fault]]");
            let _ = writeln!(o, "kind = {}", quoted(f.kind));
            let _ = writeln!(o, "at_s = {:?}", f.at_s);
            if let Some(u) = f.until_s {
                let _ = writeln!(o, "until_s = {u:?}");
            }
            for k in &f.keys {
                let _ = writeln!(o, "{k}");
            }
        }
        let _ = writeln!(o, "\n[start]");
        let _ = writeln!(o, "position_m = {}", v3(self.start_m));
        o
    }

    fn write_conduit(&self, o: &mut String, c: &DraftConduit) {
        let id = |i: usize| self.nodes.get(i).map_or("?", |n| n.id.as_str());
        let _ = writeln!(o, "\n[[conduit]]");
        let _ = writeln!(o, "id = {}", quoted(&c.id));
        let _ = writeln!(o, "from = {}", quoted(id(c.from)));
        let _ = writeln!(o, "to = {}", quoted(id(c.to)));
        if !c.via_m.is_empty() {
            let vias: Vec<String> = c.via_m.iter().map(|v| v3(*v)).collect();
            let _ = writeln!(o, "via_m = [{}]", vias.join(", "));
        }
        match &c.radius {
            DraftRadius::Constant(r) => {
                let _ = writeln!(o, "radius_m = {r:?}");
            }
            DraftRadius::Profile(p) => {
                let pts: Vec<String> = p.iter().map(|(f, r)| format!("[{f:?}, {r:?}]")).collect();
                let _ = writeln!(o, "radius_profile = [{}]", pts.join(", "));
            }
        }
        let _ = writeln!(o, "roughness_m = {:?}", c.roughness_m);
        if c.compressible {
            let _ = writeln!(o, "compressible = true");
        }
    }

    /// The demos' ring layout on every module: a 10-sensor nose ring on the
    /// head (see `SCENARIOS.md`), then two staggered rings of 5 per module;
    /// and a nose cap of 4 (tip, and 3 at 45 degrees from the head axis).
    fn write_robot(&self, o: &mut String) {
        let r = &self.robot;
        let _ = writeln!(o, "\n[robot]");
        let _ = writeln!(o, "speed_limit_m_per_s = {:?}", r.speed_limit_m_per_s);
        for k in 0..r.modules {
            let _ = writeln!(o, "\n[[robot.module]]");
            let _ = writeln!(o, "length_m = {:?}", r.module_length_m);
            let _ = writeln!(o, "radius_m = {:?}", r.module_radius_m);
            if k == 0 {
                let _ = writeln!(o, "[[robot.module.ring]]\naxial_m = 0.005\ncount = 10");
            }
            let _ = writeln!(o, "[[robot.module.ring]]\naxial_m = 0.05\ncount = 5");
            let _ = writeln!(
                o,
                "[[robot.module.ring]]\naxial_m = 0.15\ncount = 5\nfirst_angle_deg = 36.0"
            );
        }
        // The nose cap: a tip sensor and a ring of 3 at 45 degrees, which
        // fill the 64 contact slots of the host navigator.
        let _ = writeln!(o, "\n[[robot.nose_cap]]\npolar_deg = 0.0\ncount = 1");
        let _ = writeln!(o, "[[robot.nose_cap]]\npolar_deg = 45.0\ncount = 3");
        let _ = writeln!(o, "\n[robot.probe]");
        let _ = writeln!(o, "layout = {}", quoted(r.probe_layout));
        let _ = writeln!(o, "head_radius_m = {:?}", r.head_radius_m);
    }
}
