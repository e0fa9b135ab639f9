//! The world families: what each draws, from which ranges, and the feature
//! that defines it. The ranges and their physical reasons are tabled in
//! `replay/SCENARIOS.md` ("Generated worlds"); keep the two in step.

use std::collections::BTreeMap;

use super::draft::{
    Draft, DraftConduit, DraftFault, DraftKind, DraftNode, DraftProbeNoise, DraftRadius, DraftRobot,
};
use super::shape::{self, mm, mm3};
use super::{Draw, WorldGenError};
use crate::sim::Sim;
use crate::sim::vec3::{self, V3};
use nav_core::gas::IdealGas;

/// A family of generated worlds.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum Family {
    /// Two or three passable branches whose flows differ by a drawn ratio.
    Fork,
    /// The branch with most of the flow is a slot narrower than the body.
    NarrowStrongest,
    /// The strongest branch narrows below the body several metres in.
    Pinch,
    /// Long drifts in slow air with low-range transducer noise.
    Slow,
    /// Conduits 1.2 to 2 body diameters across, with bends.
    Tight,
    /// 8 to 20 conduits with loops, blind ends and more than one exit.
    Maze,
    /// A compressible fissure with a choked throat, supersonic flow and a
    /// shock.
    Hot,
    /// One of the others with a random fault schedule.
    Faulted,
}

/// Ambient pressure of the air families' exits, Pa (one standard
/// atmosphere; the flows are set by mass flow, so its value only sets the
/// density).
const AMBIENT_PA: f64 = 101_325.0;

/// Parameters every family draws.
pub const COMMON_KEYS: [&str; 4] = [
    "body_radius_m",
    "noise_pa",
    "speed_limit_m_per_s",
    "temperature_k",
];

/// Temperatures of the air families, K (mine and cave air, 2 to 27 C).
const AIR_K: (f64, f64) = (275.0, 300.0);

/// Skin compliance the worlds are drawn for, m (the scenario default).
const COMPLIANCE_M: f64 = 0.005;

/// Module length of the drawn robots, m (as the demos').
const MODULE_M: f64 = 0.2;

/// Distance of the start point from the start exit, m: the straight body
/// (five 0.2 m modules) lies behind the head with 0.5 m to spare.
const START_IN_M: f64 = 1.5;

impl Family {
    /// Every family, in scorecard order.
    pub const ALL: [Self; 8] = [
        Self::Fork,
        Self::NarrowStrongest,
        Self::Pinch,
        Self::Slow,
        Self::Tight,
        Self::Maze,
        Self::Hot,
        Self::Faulted,
    ];

    /// The families a faulted world is drawn over (`base_family` 1 to 7).
    const BASES: [Self; 7] = [
        Self::Fork,
        Self::NarrowStrongest,
        Self::Pinch,
        Self::Slow,
        Self::Tight,
        Self::Maze,
        Self::Hot,
    ];

    /// Its name on the command line and in results.
    #[must_use]
    pub fn name(self) -> &'static str {
        match self {
            Self::Fork => "fork",
            Self::NarrowStrongest => "narrow-strongest",
            Self::Pinch => "pinch",
            Self::Slow => "slow",
            Self::Tight => "tight",
            Self::Maze => "maze",
            Self::Hot => "hot",
            Self::Faulted => "faulted",
        }
    }

    /// The family of a name.
    #[must_use]
    pub fn from_name(name: &str) -> Option<Self> {
        Self::ALL.into_iter().find(|f| f.name() == name)
    }

    /// One line on what the family is.
    #[must_use]
    pub fn summary(self) -> &'static str {
        match self {
            Self::Fork => "two or three passable branches, flows differing by a drawn ratio 1.2-3",
            Self::NarrowStrongest => {
                "most of the flow comes through a slot narrower than the body; the reachable source is up a weaker branch"
            }
            Self::Pinch => {
                "the strongest branch is passable for several metres, then narrows below the body"
            }
            Self::Slow => {
                "long drifts in 0.2-0.5 m/s air with bends and raises, 0.01-0.05 Pa port noise"
            }
            Self::Tight => "conduits 1.2-2 body diameters across, with bends",
            Self::Maze => "8-20 conduits with loops, blind ends and more than one exit",
            Self::Hot => "steam through a choked throat: supersonic flow and a normal shock",
            Self::Faulted => "any other family with a random fault schedule",
        }
    }

    /// The parameters the family draws besides [`COMMON_KEYS`] (any may be
    /// fixed).
    #[must_use]
    pub fn keys(self) -> &'static [&'static str] {
        match self {
            Self::Fork => &["branches", "flow_speed_m_per_s", "ratio"],
            Self::NarrowStrongest => &["jet_speed_m_per_s", "ratio", "slot_fraction"],
            Self::Pinch => &[
                "pinch_at_m",
                "pinch_fraction",
                "pinch_speed_m_per_s",
                "ratio",
            ],
            Self::Slow => &["blind_spur", "flow_speed_m_per_s", "length_m"],
            Self::Tight => &["blind_spur", "diameter_ratio", "flow_speed_m_per_s"],
            Self::Maze => &["loops", "source_pressure_pa"],
            Self::Hot => &["ambient_pressure_pa", "pressure_ratio"],
            Self::Faulted => &["base_family", "faults"],
        }
    }

    /// Refuse fixed parameters the family does not draw.
    pub(crate) fn check_keys(self, fixed: &BTreeMap<String, f64>) -> Result<(), WorldGenError> {
        for k in fixed.keys() {
            let known = COMMON_KEYS.contains(&k.as_str())
                || self.keys().contains(&k.as_str())
                || (self == Self::Faulted
                    && Self::BASES.iter().any(|b| b.keys().contains(&k.as_str())));
            if !known {
                let mut all: Vec<&str> = COMMON_KEYS.to_vec();
                all.extend(self.keys());
                return Err(WorldGenError::BadParameter {
                    family: self.name(),
                    reason: format!("unknown parameter {k:?}; it draws {}", all.join(", ")),
                });
            }
        }
        Ok(())
    }

    /// Draw one attempt's world.
    /// Position in [`Family::ALL`] (separates the families' random streams).
    #[must_use]
    pub fn index(self) -> u64 {
        Self::ALL
            .iter()
            .position(|f| *f == self)
            .map_or(0, |i| i as u64)
    }

    pub(crate) fn draft(self, d: &mut Draw, seed: u64) -> Result<Draft, String> {
        let mut w = match self {
            Self::Fork => fork(d)?,
            Self::NarrowStrongest => narrow_strongest(d)?,
            Self::Pinch => pinch(d)?,
            Self::Slow => slow(d)?,
            Self::Tight => tight(d)?,
            Self::Maze => maze(d)?,
            Self::Hot => hot(d)?,
            Self::Faulted => {
                let k = d.count("base_family", 1, 7);
                let base = Self::BASES
                    .get(usize::try_from(k).unwrap_or(1).saturating_sub(1))
                    .copied()
                    .ok_or_else(|| format!("base_family {k}: must be 1 to 7"))?;
                let mut w = base.draft(d, seed)?;
                add_faults(d, &mut w);
                w.description = format!("{} + faults: {}", base.name(), w.description);
                w
            }
        };
        w.name = format!("{}-{seed}", self.name());
        w.seed = seed;
        Ok(w)
    }

    /// Check that a built world has the family's defining feature.
    pub(crate) fn check_features(self, sim: &Sim) -> Result<(), String> {
        let passable = sim.true_path().is_some_and(|p| p.passable);
        if !passable {
            return Err("no passable path to a source".into());
        }
        let r_body = sim.scenario().robot_radius_m();
        let g = &sim.world().geometry;
        match self {
            Self::NarrowStrongest | Self::Pinch => {
                // The strongest branch at the fork (conduit 1 by the drafts'
                // order) is narrower than the body somewhere, and for pinch
                // wide enough at its mouth.
                let strong = strongest_branch(sim).ok_or("no branch at the fork")?;
                let cg = &g.conduits[strong];
                if cg.min_radius_m >= r_body {
                    return Err("the strongest branch is not narrower than the body".into());
                }
                if self == Self::Pinch && g.radius_at(strong, 0.0) <= r_body + 0.05 {
                    return Err("the pinched branch is not passable at its mouth".into());
                }
                Ok(())
            }
            Self::Hot => {
                let shocked = sim
                    .world()
                    .solution
                    .links
                    .iter()
                    .filter_map(|l| l.nozzle.as_ref())
                    .any(|n| n.choked && n.shock.is_some());
                if shocked {
                    Ok(())
                } else {
                    Err("the fissure is not choked with a standing shock".into())
                }
            }
            _ => Ok(()),
        }
    }
}

/// The conduit leaving the first junction (node `fork`) with the most flow
/// toward it.
fn strongest_branch(sim: &Sim) -> Option<usize> {
    let sc = sim.scenario();
    let fork = sc.nodes.iter().position(|n| n.id == "fork")?;
    let mut best: Option<(f64, usize)> = None;
    for (ci, c) in sc.conduits.iter().enumerate() {
        let m = sim.world().mass_flow_kg_per_s(ci);
        let inflow = if c.shape.to == fork {
            m
        } else if c.shape.from == fork {
            -m
        } else {
            continue;
        };
        if best.is_none_or(|b| inflow > b.0) {
            best = Some((inflow, ci));
        }
    }
    best.map(|b| b.1)
}

// ---------------------------------------------------------------- common parts

/// The robot, gas and probe noise shared by the air families.
struct Common {
    robot: DraftRobot,
    temperature_k: f64,
    probe: DraftProbeNoise,
}

fn common(d: &mut Draw, noise_pa: (f64, f64), temperature_k: (f64, f64)) -> Common {
    let r = mm(d.param("body_radius_m", 0.05, 0.07));
    let speed = mm(d.param("speed_limit_m_per_s", 0.25, 0.3));
    let layout = if d.coin() { "five_port" } else { "seven_port" };
    let t = mm(d.param("temperature_k", temperature_k.0, temperature_k.1));
    let noise = d.param("noise_pa", noise_pa.0, noise_pa.1);
    let noise = libm::round(noise * 1e4) / 1e4;
    Common {
        robot: DraftRobot {
            speed_limit_m_per_s: speed,
            modules: 5,
            module_length_m: MODULE_M,
            module_radius_m: r,
            probe_layout: layout,
            head_radius_m: 0.03,
        },
        temperature_k: t,
        probe: DraftProbeNoise {
            noise_pa: noise,
            bias_sigma_pa: libm::round(noise / 3.0 * 1e4) / 1e4,
            latency_s: 0.02,
        },
    }
}

/// Air density at the exits, kg/m^3 (ideal gas).
fn air_density(t_k: f64) -> f64 {
    AMBIENT_PA / (IdealGas::DRY_AIR.r_j_per_kg_k() * t_k)
}

/// Mass flow of air at `speed` through a circle of radius `r`, kg/s,
/// rounded to 6 significant digits' worth (1e-7 kg/s).
fn mass_flow(rho: f64, speed_m_per_s: f64, r_m: f64) -> f64 {
    libm::round(rho * speed_m_per_s * core::f64::consts::PI * r_m * r_m * 1e7) / 1e7
}

/// A world under construction.
struct Builder {
    nodes: Vec<DraftNode>,
    conduits: Vec<DraftConduit>,
}

impl Builder {
    fn new() -> Self {
        Self {
            nodes: Vec::new(),
            conduits: Vec::new(),
        }
    }

    fn node(&mut self, id: &str, p: V3, kind: DraftKind) -> usize {
        self.nodes.push(DraftNode {
            id: id.into(),
            position_m: mm3(p),
            kind,
        });
        self.nodes.len() - 1
    }

    /// A conduit along `line` (both ends included) from node `from`; the
    /// `to` node is placed at the line's end.
    fn conduit(&mut self, id: &str, from: usize, to: usize, line: &[V3], radius: DraftRadius) {
        if let (Some(&end), Some(n)) = (line.last(), self.nodes.get_mut(to)) {
            n.position_m = mm3(end);
        }
        let via = if line.len() > 2 {
            line[1..line.len() - 1].to_vec()
        } else {
            Vec::new()
        };
        self.conduits.push(DraftConduit {
            id: id.into(),
            from,
            to,
            via_m: via,
            radius,
            roughness_m: 0.03,
            compressible: false,
        });
    }

    fn position(&self, n: usize) -> V3 {
        self.nodes.get(n).map_or([0.0; 3], |n| n.position_m)
    }

    fn finish(self, c: Common, description: String, route_m: f64, start_m: V3) -> Draft {
        // Enough time to feel along the whole route at a tenth of a metre
        // per second, plus two minutes; a failing run ends by this limit.
        let duration = (120.0 + route_m / 0.1).clamp(300.0, 1500.0);
        Draft {
            name: String::new(),
            description,
            comments: Vec::new(),
            seed: 0,
            duration_s: libm::round(duration),
            species: "air",
            temperature_k: c.temperature_k,
            nodes: self.nodes,
            conduits: self.conduits,
            robot: c.robot,
            probe: c.probe,
            faults: Vec::new(),
            start_m,
        }
    }
}

/// Segment lengths summing to `total_m`, each within ±30 % of the mean.
fn segments(d: &mut Draw, total_m: f64, n: usize) -> Vec<f64> {
    let n = n.max(1);
    let raw: Vec<f64> = (0..n).map(|_| d.uniform(0.7, 1.3)).collect();
    let sum: f64 = raw.iter().sum();
    raw.iter().map(|x| total_m * x / sum).collect()
}

/// `n` turns, each up to `max_yaw` in azimuth (either way) and `max_pitch`
/// in elevation.
fn turns(d: &mut Draw, n: usize, max_yaw_rad: f64, max_pitch_rad: f64) -> Vec<(f64, f64)> {
    (0..n)
        .map(|_| {
            (
                d.uniform(-max_yaw_rad, max_yaw_rad),
                d.uniform(-max_pitch_rad, max_pitch_rad),
            )
        })
        .collect()
}

/// The largest turn (yaw and pitch together) stays within `limit`.
fn cap_turns(t: &mut [(f64, f64)], limit_rad: f64) {
    for (y, p) in t.iter_mut() {
        let m = libm::sqrt(*y * *y + *p * *p);
        if m > limit_rad && m > 0.0 {
            *y *= limit_rad / m;
            *p *= limit_rad / m;
        }
    }
}

/// Direction of the last piece of a polyline.
fn end_dir(line: &[V3]) -> V3 {
    match line {
        [.., a, b] => vec3::unit(vec3::sub(*b, *a)).unwrap_or([1.0, 0.0, 0.0]),
        _ => [1.0, 0.0, 0.0],
    }
}

/// The entry drift: from a portal exit at the origin along +x, straight for
/// its first 3 m (the robot is laid there), then up to one bend. Returns the
/// polyline.
fn entry_line(d: &mut Draw, radius_m: f64, r_body: f64) -> Vec<V3> {
    let len = d.uniform(6.0, 12.0);
    let bend_cap = shape::passable_bend_rad(radius_m, r_body, MODULE_M, COMPLIANCE_M).min(0.5);
    let mut t = turns(d, 1, 0.5, 0.15);
    cap_turns(&mut t, bend_cap);
    let first = 3.0 + d.uniform(0.0, 2.0);
    shape::bent_line([0.0; 3], 0.0, 0.0, &[first, len - first], &t, 0.25)
}

/// Where the robot starts: [`START_IN_M`] along the first piece of `line`.
fn start_on(line: &[V3]) -> V3 {
    match line {
        [a, b, ..] => {
            let dir = vec3::unit(vec3::sub(*b, *a)).unwrap_or([1.0, 0.0, 0.0]);
            mm3(vec3::axpy(*a, START_IN_M, dir))
        }
        _ => [START_IN_M, 0.0, 0.0],
    }
}

/// One branch leaving a junction: its radius, azimuth offset from the
/// arriving direction, length and source flow.
struct BranchPlan {
    radius: DraftRadius,
    yaw_offset_rad: f64,
    length_m: f64,
    source: DraftKind,
}

/// Lay out branches from the junction `fork` whose arriving direction is
/// `arrive`; each ends at its own source node. Returns the branches'
/// conduit indices.
fn lay_branches(
    d: &mut Draw,
    b: &mut Builder,
    fork: usize,
    arrive: V3,
    plans: &[BranchPlan],
    r_body: f64,
) -> Vec<usize> {
    let (yaw0, _) = shape::angles(arrive);
    let names = ["branch-a", "branch-b", "branch-c"];
    let mut out = Vec::new();
    for (k, p) in plans.iter().enumerate() {
        let name = names.get(k).copied().unwrap_or("branch-x");
        let src_name = format!("source-{}", &name[7..]);
        let src = b.node(&src_name, [0.0; 3], p.source);
        let pitch = d.uniform(-0.15, 0.15);
        let start = b.position(fork);
        let line = if p.length_m > 5.0 {
            let cap = shape::passable_bend_rad(p.radius.min_m(), r_body, MODULE_M, COMPLIANCE_M)
                .min(0.45);
            let mut t = turns(d, 1, 0.45, 0.15);
            cap_turns(&mut t, cap);
            let a = p.length_m * d.uniform(0.4, 0.6);
            shape::bent_line(
                start,
                yaw0 + p.yaw_offset_rad,
                pitch,
                &[a, p.length_m - a],
                &t,
                0.3,
            )
        } else {
            shape::bent_line(
                start,
                yaw0 + p.yaw_offset_rad,
                pitch,
                &[p.length_m],
                &[],
                0.3,
            )
        };
        b.conduit(name, fork, src, &line, p.radius.clone());
        out.push(b.conduits.len() - 1);
    }
    out
}

/// Azimuth offsets for `n` branches: two either side of the arriving
/// direction, a third near straight on; at least 35 degrees apart.
fn spread(d: &mut Draw, n: usize) -> Vec<f64> {
    let deg = core::f64::consts::PI / 180.0;
    let mut v = vec![-d.uniform(25.0, 65.0) * deg, d.uniform(25.0, 65.0) * deg];
    if n >= 3 {
        v.push(d.uniform(-8.0, 8.0) * deg);
    }
    v
}

/// Branch flows from the strongest down: `second = strongest / ratio`, a
/// third (when asked) a drawn fraction of the second.
fn flows(d: &mut Draw, strongest: f64, ratio: f64, n: usize) -> Vec<f64> {
    let mut f = vec![strongest, strongest / ratio];
    if n >= 3 {
        let third = f[1] * d.uniform(0.3, 0.8);
        f.push(third);
    }
    f
}

/// Put the strongest flow on a drawn branch: rotate the order.
fn rotate<T>(d: &mut Draw, mut v: Vec<T>) -> Vec<T> {
    let k = d.index(v.len());
    v.rotate_left(k);
    v
}

// ---------------------------------------------------------------- families

fn fork(d: &mut Draw) -> Result<Draft, String> {
    let c = common(d, (0.02, 0.08), AIR_K);
    let r_body = c.robot.module_radius_m;
    let n = usize::try_from(d.count("branches", 2, 3))
        .unwrap_or(2)
        .clamp(2, 3);
    let ratio = d.param("ratio", 1.2, 3.0);
    let speed = d.param("flow_speed_m_per_s", 0.6, 2.0);
    let r_entry = mm(d.uniform(0.3, 0.7));
    let rho = air_density(c.temperature_k);
    let total = rho * speed * core::f64::consts::PI * r_entry * r_entry;
    let mut f = flows(d, 1.0, ratio, n);
    let s: f64 = f.iter().sum();
    for x in &mut f {
        *x = libm::round(*x * total / s * 1e7) / 1e7;
    }
    let offsets = spread(d, n);
    let mut b = Builder::new();
    let portal = b.node("portal", [0.0; 3], DraftKind::Exit(AMBIENT_PA));
    let fork = b.node("fork", [0.0; 3], DraftKind::Junction);
    let entry = entry_line(d, r_entry, r_body);
    b.conduit(
        "entry",
        portal,
        fork,
        &entry,
        DraftRadius::Constant(r_entry),
    );
    let flows_rot = rotate(d, f);
    let plans: Vec<BranchPlan> = (0..n)
        .map(|k| BranchPlan {
            radius: DraftRadius::Constant(mm(d.uniform(r_body + 0.2, 0.6))),
            yaw_offset_rad: offsets[k],
            length_m: d.uniform(5.0, 11.0),
            source: DraftKind::MassFlow(flows_rot[k]),
        })
        .collect();
    lay_branches(d, &mut b, fork, end_dir(&entry), &plans, r_body);
    let route = vec3::dist([0.0; 3], b.position(fork)) + 12.0;
    let start = start_on(&entry);
    let desc = format!("{n} passable branches, strongest to next flow ratio {ratio:.2}");
    Ok(b.finish(c, desc, route, start))
}

/// The narrow-jet families share their layout: an entry, then the jet
/// branch (its radius profile given) and one or two passable weaker
/// branches.
fn jet_layout(
    d: &mut Draw,
    c: Common,
    jet_radius: DraftRadius,
    jet_length_m: f64,
    jet_flow: f64,
    ratio: f64,
    what: String,
) -> Draft {
    let r_body = c.robot.module_radius_m;
    let r_entry = mm(d.uniform(0.2, 0.32).max(r_body + 0.1));
    let n = if d.coin() { 2 } else { 3 };
    let weaker = flows(d, jet_flow, ratio, n);
    let offsets = spread(d, n);
    let mut b = Builder::new();
    let portal = b.node("portal", [0.0; 3], DraftKind::Exit(AMBIENT_PA));
    let fork = b.node("fork", [0.0; 3], DraftKind::Junction);
    let entry = entry_line(d, r_entry, r_body);
    b.conduit(
        "entry",
        portal,
        fork,
        &entry,
        DraftRadius::Constant(r_entry),
    );
    let mut plans = vec![BranchPlan {
        radius: jet_radius,
        yaw_offset_rad: 0.0,
        length_m: jet_length_m,
        source: DraftKind::MassFlow(jet_flow),
    }];
    for w in weaker.iter().skip(1) {
        plans.push(BranchPlan {
            radius: DraftRadius::Constant(mm(d.uniform(r_body + 0.09, r_body + 0.2))),
            yaw_offset_rad: 0.0,
            length_m: d.uniform(5.0, 10.0),
            source: DraftKind::MassFlow(*w),
        });
    }
    // The jet takes a drawn slot among the directions.
    let k = d.index(n);
    let mut offs = offsets;
    offs.rotate_left(k);
    for (p, o) in plans.iter_mut().zip(offs) {
        p.yaw_offset_rad = o;
    }
    lay_branches(d, &mut b, fork, end_dir(&entry), &plans, r_body);
    let route = vec3::dist([0.0; 3], b.position(fork)) + 2.0 * jet_length_m + 10.0;
    let start = start_on(&entry);
    b.finish(c, what, route, start)
}

fn narrow_strongest(d: &mut Draw) -> Result<Draft, String> {
    let c = common(d, (0.02, 0.08), AIR_K);
    let r_body = c.robot.module_radius_m;
    let frac = d.param("slot_fraction", 0.5, 0.9);
    let jet = d.param("jet_speed_m_per_s", 6.0, 20.0);
    let ratio = d.param("ratio", 1.2, 3.0);
    let r_slot = mm(frac * r_body).max(0.01);
    let flow = mass_flow(air_density(c.temperature_k), jet, r_slot);
    let len = d.uniform(3.0, 6.0);
    let what = format!(
        "slot {:.0} mm across (body {:.0} mm) carries {ratio:.2}x the next flow",
        2000.0 * r_slot,
        2000.0 * r_body
    );
    Ok(jet_layout(
        d,
        c,
        DraftRadius::Constant(r_slot),
        len,
        flow,
        ratio,
        what,
    ))
}

fn pinch(d: &mut Draw) -> Result<Draft, String> {
    let c = common(d, (0.02, 0.08), AIR_K);
    let r_body = c.robot.module_radius_m;
    let at = d.param("pinch_at_m", 3.0, 8.0);
    let frac = d.param("pinch_fraction", 0.4, 0.85);
    let v = d.param("pinch_speed_m_per_s", 5.0, 15.0);
    let ratio = d.param("ratio", 1.2, 3.0);
    let r_wide = mm(d.uniform(r_body + 0.12, r_body + 0.25));
    let r_pinch = mm(frac * r_body).max(0.01);
    let taper = d.uniform(0.5, 1.5);
    let beyond = d.uniform(2.0, 4.0);
    let len = at + taper + beyond;
    let f1 = libm::round(at / len * 1e4) / 1e4;
    let f2 = libm::round((at + taper) / len * 1e4) / 1e4;
    let profile = DraftRadius::Profile(vec![
        (0.0, r_wide),
        (f1, r_wide),
        (f2, r_pinch),
        (1.0, r_pinch),
    ]);
    let flow = mass_flow(air_density(c.temperature_k), v, r_pinch);
    let what = format!(
        "strongest branch narrows to {:.0} mm (body {:.0} mm) {at:.1} m in; next flow 1/{ratio:.2}",
        2000.0 * r_pinch,
        2000.0 * r_body
    );
    Ok(jet_layout(d, c, profile, len, flow, ratio, what))
}

/// A blind side branch off an interior vertex of a single bore.
struct SpurPlan {
    /// Turn off the bore's direction, rad (either side, drawn).
    turn_rad: (f64, f64),
    /// Radius drawn (capped at the bore's), or the bore's own.
    radius_m: Option<(f64, f64)>,
    /// Length drawn, m.
    length_m: (f64, f64),
}

/// One bore of radius `r` along `line` from `ends[0]` (the portal) to
/// `ends[1]` (the source), named `name`, or split at a drawn interior
/// vertex into `<name>-lower` and `<name>-upper` with a blind spur
/// `blind-<name>` when `spur` is given and the line has one.
fn single_bore(
    d: &mut Draw,
    b: &mut Builder,
    name: &str,
    ends: [usize; 2],
    line: &[V3],
    r: f64,
    spur: Option<&SpurPlan>,
) {
    let Some(sp) = spur.filter(|_| line.len() >= 4) else {
        b.conduit(name, ends[0], ends[1], line, DraftRadius::Constant(r));
        return;
    };
    let k = 2 + d.index(line.len() - 3);
    let side = b.node("side-junction", line[k], DraftKind::Junction);
    let lower = format!("{name}-lower");
    let upper = format!("{name}-upper");
    b.conduit(&lower, ends[0], side, &line[..=k], DraftRadius::Constant(r));
    b.conduit(&upper, side, ends[1], &line[k..], DraftRadius::Constant(r));
    let (yaw, _) = shape::angles(end_dir(&line[..=k]));
    let off = if d.coin() { 1.0 } else { -1.0 } * d.uniform(sp.turn_rad.0, sp.turn_rad.1);
    let blind = b.node("blind-end", [0.0; 3], DraftKind::Junction);
    let spur_r = sp
        .radius_m
        .map_or(r, |(lo, hi)| mm(d.uniform(lo, hi).min(r)));
    let len = d.uniform(sp.length_m.0, sp.length_m.1);
    let spur_line = shape::bent_line(line[k], yaw + off, 0.0, &[len], &[], 0.2);
    b.conduit(
        &format!("blind-{name}"),
        side,
        blind,
        &spur_line,
        DraftRadius::Constant(spur_r),
    );
}

fn slow(d: &mut Draw) -> Result<Draft, String> {
    let c = common(d, (0.01, 0.05), AIR_K);
    let r_body = c.robot.module_radius_m;
    let v = d.param("flow_speed_m_per_s", 0.2, 0.5);
    let length = d.param("length_m", 30.0, 60.0);
    let spur = d.count("blind_spur", 0, 1) == 1;
    let r = mm(d.uniform(0.4, 1.0));
    let nseg = 4 + d.index(4);
    let mut seg = segments(d, length - 3.0, nseg);
    seg.insert(0, 3.0);
    let cap = shape::passable_bend_rad(r, r_body, MODULE_M, COMPLIANCE_M).min(0.8);
    let mut t = turns(d, seg.len() - 1, 0.8, 0.2);
    cap_turns(&mut t, cap);
    let line = shape::bent_line([0.0; 3], 0.0, 0.0, &seg, &t, 0.21);
    let flow = mass_flow(air_density(c.temperature_k), v, r);
    let mut b = Builder::new();
    let portal = b.node("portal", [0.0; 3], DraftKind::Exit(AMBIENT_PA));
    let source = b.node("source", [0.0; 3], DraftKind::MassFlow(flow));
    let plan = SpurPlan {
        turn_rad: (0.7, 1.2),
        radius_m: Some((0.3, 0.6)),
        length_m: (4.0, 8.0),
    };
    single_bore(
        d,
        &mut b,
        "drift",
        [portal, source],
        &line,
        r,
        spur.then_some(&plan),
    );
    let start = start_on(&line);
    let what = format!("{length:.0} m drift, radius {r:.2} m, air at {v:.2} m/s");
    Ok(b.finish(c, what, length, start))
}

fn tight(d: &mut Draw) -> Result<Draft, String> {
    let c = common(d, (0.02, 0.08), AIR_K);
    let r_body = c.robot.module_radius_m;
    let k = d.param("diameter_ratio", 1.2, 2.0);
    let v = d.param("flow_speed_m_per_s", 0.5, 1.5);
    let spur = d.count("blind_spur", 0, 1) == 1;
    let r = mm(k * r_body);
    let length = d.uniform(8.0, 20.0);
    let nseg = 3 + d.index(4);
    let mut seg = segments(d, length - 2.5, nseg);
    seg.insert(0, 2.5);
    // Bends the module chain passes (chord geometry) and no more than 25
    // degrees, with raises of up to 10 degrees.
    let cap = shape::passable_bend_rad(r, r_body, MODULE_M, COMPLIANCE_M).min(0.44);
    let mut t = turns(d, seg.len() - 1, 0.44, 0.17);
    cap_turns(&mut t, cap);
    let line = shape::bent_line([0.0; 3], 0.0, 0.0, &seg, &t, 0.18);
    let flow = mass_flow(air_density(c.temperature_k), v, r);
    let mut b = Builder::new();
    let portal = b.node("portal", [0.0; 3], DraftKind::Exit(AMBIENT_PA));
    let source = b.node("source", [0.0; 3], DraftKind::MassFlow(flow));
    let plan = SpurPlan {
        turn_rad: (0.8, 1.3),
        radius_m: None,
        length_m: (2.0, 4.0),
    };
    single_bore(
        d,
        &mut b,
        "bore",
        [portal, source],
        &line,
        r,
        spur.then_some(&plan),
    );
    let start = start_on(&line);
    let what = format!(
        "{length:.0} m bore {:.0} mm across ({k:.2} body diameters), air at {v:.2} m/s",
        2000.0 * r
    );
    Ok(b.finish(c, what, length, start))
}

/// Union-find root with path halving (bounded: at most `parent.len()` hops).
fn root(parent: &mut [usize], mut i: usize) -> usize {
    for _ in 0..parent.len() {
        if parent[i] == i {
            break;
        }
        parent[i] = parent[parent[i]];
        i = parent[i];
    }
    i
}

fn maze(d: &mut Draw) -> Result<Draft, String> {
    let c = common(d, (0.02, 0.08), AIR_K);
    let r_body = c.robot.module_radius_m;
    let loops = usize::try_from(d.count("loops", 1, 3)).unwrap_or(1);
    let dp = d.param("source_pressure_pa", 0.8, 4.0);
    let (nx, ny) = (4usize, 3 + d.index(2));
    let spacing = d.uniform(6.0, 9.0);
    let n = nx * ny;
    let mut pos = Vec::with_capacity(n);
    for j in 0..ny {
        for i in 0..nx {
            #[allow(clippy::cast_precision_loss)]
            let p = [
                i as f64 * spacing + d.uniform(-1.0, 1.0),
                j as f64 * spacing + d.uniform(-1.0, 1.0),
                d.uniform(-1.0, 1.0),
            ];
            pos.push(mm3(p));
        }
    }
    // Grid-neighbour edges, shuffled (Fisher-Yates), then a spanning tree
    // by union-find and `loops` extra edges.
    let mut edges = Vec::new();
    for j in 0..ny {
        for i in 0..nx {
            let a = j * nx + i;
            if i + 1 < nx {
                edges.push((a, a + 1));
            }
            if j + 1 < ny {
                edges.push((a, a + nx));
            }
        }
    }
    for k in (1..edges.len()).rev() {
        let m = d.index(k + 1);
        edges.swap(k, m);
    }
    let mut parent: Vec<usize> = (0..n).collect();
    let mut chosen = Vec::new();
    let mut spare = Vec::new();
    for &(a, b) in &edges {
        let (ra, rb) = (root(&mut parent, a), root(&mut parent, b));
        if ra == rb {
            spare.push((a, b));
        } else {
            parent[ra] = rb;
            chosen.push((a, b));
        }
    }
    chosen.extend(spare.iter().take(loops));
    let mut degree = vec![0usize; n];
    for &(a, b) in &chosen {
        degree[a] += 1;
        degree[b] += 1;
    }
    let leaves: Vec<usize> = (0..n).filter(|&i| degree[i] == 1).collect();
    if leaves.len() < 4 {
        return Err(format!("only {} dead-end nodes (need 4)", leaves.len()));
    }
    let start_exit = leaves[d.index(leaves.len())];
    // Hop distances from the start exit (breadth first, bounded by n).
    let mut hops = vec![usize::MAX; n];
    hops[start_exit] = 0;
    let mut frontier = vec![start_exit];
    for h in 1..=n {
        let mut next = Vec::new();
        for &u in &frontier {
            for &(a, b) in &chosen {
                let v = if a == u {
                    b
                } else if b == u {
                    a
                } else {
                    continue;
                };
                if hops[v] == usize::MAX {
                    hops[v] = h;
                    next.push(v);
                }
            }
        }
        frontier = next;
    }
    let source = *leaves
        .iter()
        .filter(|&&l| l != start_exit)
        .max_by_key(|&&l| (hops[l], usize::MAX - l))
        .ok_or("no leaf for the source")?;
    let others: Vec<usize> = leaves
        .iter()
        .copied()
        .filter(|&l| l != start_exit && l != source)
        .collect();
    let second_exit = others[d.index(others.len())];
    let mut b = Builder::new();
    let mut ids = vec![0usize; n];
    let mut blind = 0;
    for i in 0..n {
        let (name, kind) = if i == start_exit {
            ("portal".to_string(), DraftKind::Exit(AMBIENT_PA))
        } else if i == second_exit {
            let p = AMBIENT_PA + libm::round(d.uniform(0.0, 0.4) * 100.0) / 100.0;
            ("far-portal".to_string(), DraftKind::Exit(p))
        } else if i == source {
            let p = AMBIENT_PA + libm::round(dp * 1000.0) / 1000.0;
            ("source".to_string(), DraftKind::Reservoir(p))
        } else if degree[i] == 1 {
            blind += 1;
            (format!("blind-end-{blind}"), DraftKind::Junction)
        } else {
            (format!("crossing-{i}"), DraftKind::Junction)
        };
        ids[i] = b.node(&name, pos[i], kind);
    }
    let mut start = [0.0; 3];
    for (k, &(a0, b0)) in chosen.iter().enumerate() {
        // Conduits leave the start exit outward so the robot starts facing in.
        let (a, bb) = if b0 == start_exit { (b0, a0) } else { (a0, b0) };
        let (pa, pb) = (pos[a], pos[bb]);
        let mid = vec3::scale(vec3::add(pa, pb), 0.5);
        let along = vec3::unit(vec3::sub(pb, pa)).unwrap_or([1.0, 0.0, 0.0]);
        let across = vec3::unit(vec3::cross(along, [0.0, 0.0, 1.0])).unwrap_or([0.0, 1.0, 0.0]);
        let r = mm(d.uniform(0.35, 0.7).max(r_body + 0.2));
        // A bend the chain passes, at the midpoint.
        let room = shape::passable_bend_rad(r, r_body, MODULE_M, COMPLIANCE_M).min(0.5);
        let half = 0.5 * vec3::dist(pa, pb);
        let off = half * libm::tan(0.5 * room) * d.uniform(-1.0, 1.0);
        let via = mm3(vec3::add(mid, vec3::scale(across, off)));
        let line = [pa, via, pb];
        if a == start_exit {
            start = start_on(&line);
        }
        b.conduit(
            &format!("drift-{k}"),
            ids[a],
            ids[bb],
            &line,
            DraftRadius::Constant(r),
        );
    }
    #[allow(clippy::cast_precision_loss)]
    let route = hops[source] as f64 * spacing * 1.5;
    let what = format!(
        "{} conduits on a {nx}x{ny} grid, {loops} loop(s), {blind} blind end(s), two exits",
        chosen.len()
    );
    Ok(b.finish(c, what, route, start))
}

fn hot(d: &mut Draw) -> Result<Draft, String> {
    let mut c = common(d, (5.0, 30.0), (390.0, 440.0));
    c.robot.probe_layout = "seven_port";
    let r_body = c.robot.module_radius_m;
    let p_amb = libm::round(d.param("ambient_pressure_pa", 80_000.0, 100_000.0));
    let ratio = d.param("pressure_ratio", 1.5, 2.1);
    let r_in = mm(d.uniform(0.28, 0.4));
    let r_throat = mm(d.uniform((1.7 * r_body).max(0.1), (1.7 * r_body).max(0.1) + 0.05));
    let r_out = mm(d.uniform(0.25, 0.35).max(r_throat + 0.08));
    let f_t = libm::round(d.uniform(0.35, 0.55) * 100.0) / 100.0;
    let depth = d.uniform(8.0, 12.0);
    let mut b = Builder::new();
    let pocket = b.node(
        "deep-source",
        [0.0, 0.0, -depth],
        DraftKind::Reservoir(libm::round(ratio * p_amb)),
    );
    let mouth = b.node("mouth", [0.0; 3], DraftKind::Junction);
    let vent = b.node("vent", [0.0; 3], DraftKind::Exit(p_amb));
    let shelf = b.node("shelf-end", [0.0; 3], DraftKind::Junction);
    // The fissure rises steeply (60-75 degrees) with one bend the chain
    // passes at the throat's radius.
    let deg = core::f64::consts::PI / 180.0;
    let pitch = d.uniform(60.0, 75.0) * deg;
    let cap = shape::passable_bend_rad(r_throat, r_body, MODULE_M, COMPLIANCE_M).min(0.35);
    let mut t = turns(d, 1, 0.35, 0.2);
    cap_turns(&mut t, cap);
    let len = depth / libm::sin(pitch);
    let a = len * d.uniform(0.4, 0.6);
    let fissure = shape::bent_line([0.0, 0.0, -depth], 0.0, pitch, &[a, len - a], &t, 1.4);
    b.conduit(
        "fissure",
        pocket,
        mouth,
        &fissure,
        DraftRadius::Profile(vec![(0.0, r_in), (f_t, r_throat), (1.0, r_out)]),
    );
    if let Some(cd) = b.conduits.last_mut() {
        cd.compressible = true;
        cd.roughness_m = 0.01;
    }
    let mouth_p = b.position(mouth);
    let (yaw, _) = shape::angles(end_dir(&fissure));
    let chim_len = d.uniform(2.5, 4.0);
    let chimney = shape::bent_line(
        mouth_p,
        yaw,
        d.uniform(30.0, 60.0) * deg,
        &[chim_len],
        &[],
        1.2,
    );
    let r_chim = mm(d.uniform(0.3, 0.4));
    b.conduit(
        "chimney",
        mouth,
        vent,
        &chimney,
        DraftRadius::Constant(r_chim),
    );
    let shelf_line = shape::bent_line(
        mouth_p,
        yaw + if d.coin() { 1.6 } else { -1.6 },
        0.0,
        &[d.uniform(2.0, 3.0)],
        &[],
        0.2,
    );
    b.conduit(
        "shelf",
        mouth,
        shelf,
        &shelf_line,
        DraftRadius::Constant(mm(d.uniform(0.15, 0.25))),
    );
    // The robot starts in the chimney, facing down it.
    let rev: Vec<V3> = chimney.iter().rev().copied().collect();
    let start = start_on(&rev);
    let what = format!(
        "steam at {ratio:.2}x ambient through a {:.0} mm throat ({:.2} m deep)",
        2000.0 * r_throat,
        depth
    );
    let mut w = b.finish(c, what, len + chim_len, start);
    w.species = "water_vapour";
    w.probe.bias_sigma_pa = libm::round(w.probe.noise_pa * 0.5 * 100.0) / 100.0;
    w.probe.latency_s = 0.01;
    Ok(w)
}

/// Append 1 to 3 faults: port faults on ports the layout has, a dead
/// contact on a sensor the robot carries, short channel dropouts, slow
/// odometry drift.
fn add_faults(d: &mut Draw, w: &mut Draft) {
    let n = d.count("faults", 1, 3);
    let ports = if w.robot.probe_layout == "five_port" {
        5
    } else {
        7
    };
    let horizon = 0.5 * w.duration_s;
    for _ in 0..n {
        let at = libm::round(d.uniform(5.0, horizon) * 10.0) / 10.0;
        let lasting = libm::round(d.uniform(2.0, 30.0) * 10.0) / 10.0;
        let permanent = d.coin();
        let (kind, until, keys) = match d.index(6) {
            0 => (
                "port_blocked",
                permanent,
                vec![format!("port = {}", d.index(ports))],
            ),
            1 => (
                "port_stuck",
                permanent,
                vec![format!("port = {}", d.index(ports))],
            ),
            2 => {
                let f = libm::round(d.uniform(0.2, 0.6) * 100.0) / 100.0;
                (
                    "port_leak",
                    permanent,
                    vec![
                        format!("port = {}", d.index(ports)),
                        format!("leak_fraction = {f:?}"),
                    ],
                )
            }
            3 => {
                let module = d.index(5);
                let sensors = if module == 0 { 20 } else { 10 };
                (
                    "contact_dead",
                    permanent,
                    vec![
                        format!("module = {module}"),
                        format!("sensor = {}", d.index(sensors)),
                    ],
                )
            }
            4 => {
                let ch = ["probe", "pose", "contacts", "joints"][d.index(4)];
                ("dropout", false, vec![format!("channel = \"{ch}\"")])
            }
            _ => {
                let a = d.uniform(0.0, 2.0 * core::f64::consts::PI);
                let s = d.uniform(0.001, 0.005);
                let v = [
                    libm::round(s * libm::cos(a) * 1e5) / 1e5,
                    libm::round(s * libm::sin(a) * 1e5) / 1e5,
                    0.0,
                ];
                (
                    "odometry_drift",
                    permanent,
                    vec![format!(
                        "drift_m_per_s = [{:?}, {:?}, {:?}]",
                        v[0], v[1], v[2]
                    )],
                )
            }
        };
        let until_s = if kind == "dropout" {
            Some(libm::round((at + d.uniform(0.5, 5.0)) * 10.0) / 10.0)
        } else if until {
            None
        } else {
            Some(libm::round((at + lasting) * 10.0) / 10.0)
        };
        w.faults.push(DraftFault {
            kind,
            at_s: at,
            until_s,
            keys,
        });
    }
}
