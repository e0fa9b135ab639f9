//! Policy-true junction scoring: at every junction the robot passes, the
//! branch the navigation policy should have taken, by the truth.
//!
//! The policy is "follow the flow upstream, take the strongest stream the
//! body fits into, back out of what turns out to be a dead end". So, when
//! the robot goes from conduit `p` into conduit `c` through their shared
//! node `J` (each counted once the head is past the junction zone of both
//! ends, so grazing a junction is not a choice):
//!
//! - the candidates are the other conduits at `J` whose mouth at `J` is
//!   wider than the body plus the required standoff, leaving out those the
//!   robot has already entered from `J` and come back out of (dead ends it
//!   has learned);
//! - the right branch is the candidate with the most flow toward `J` (by
//!   the network solve), when some candidate carries flow toward `J`;
//!   otherwise the way the robot first came to `J` (the failure passes up);
//! - a call is *clear* when the right branch's flow toward `J` is at least
//!   [`CLEAR_RATIO`] times that of every other upstream candidate (flows
//!   within 20 % of each other are a coin toss for any sensor);
//! - entering a branch that looks passable at its mouth and pinches shut
//!   further in is right when it is the strongest: the policy cannot see
//!   the pinch from the junction. Backing out of it and taking the next
//!   branch is then right too.
//!
//! Tests: `tests/tests/worlds.rs::policy_judge_*` (scripted visits on a
//! hand-made fork with a pinched branch).

use super::geometry::Geometry;
use super::scenario::Scenario;

/// Calls where the right branch carries at least this many times the flow
/// of the next upstream candidate are clear.
pub const CLEAR_RATIO: f64 = 1.2;

/// One branch choice at a junction, judged.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct JunctionCall {
    /// Simulated time of the call (the head deep in the new conduit), s.
    pub time_s: f64,
    /// The junction node, by id.
    pub node: String,
    /// The conduit the robot came from, by id.
    pub arrived_via: String,
    /// The conduit it took, by id.
    pub taken: String,
    /// The conduit it should have taken, by id.
    pub right: String,
    /// Mass flow toward the junction in the right branch, kg/s.
    pub right_flow_kg_per_s: f64,
    /// The largest flow toward the junction among the other upstream
    /// candidates, kg/s (0 when there is none).
    pub next_flow_kg_per_s: f64,
    /// Whether the call is clear (see [`CLEAR_RATIO`]).
    pub clear: bool,
    /// Whether the taken branch is not the right one.
    pub wrong: bool,
}

/// The judge's view of one conduit.
#[derive(Debug, Clone)]
struct Arm {
    ends: [usize; 2],
    /// Mass flow from `ends[0]` to `ends[1]`, kg/s.
    flow_kg_per_s: f64,
    /// Radius at each end, m.
    mouth_m: [f64; 2],
    length_m: f64,
}

/// Scores branch choices as the robot moves.
#[derive(Debug, Clone)]
pub struct PolicyJudge {
    arms: Vec<Arm>,
    ids: Vec<String>,
    node_ids: Vec<String>,
    zone_m: Vec<f64>,
    need_m: f64,
    deep: Option<usize>,
    /// The node through which the robot entered the conduit it is deep in.
    entered_from: Option<usize>,
    /// `(node, conduit)` pairs entered and come back out of.
    learned_dead: Vec<(usize, usize)>,
    /// The conduit by which the robot first came to each node.
    first_arrival: Vec<Option<usize>>,
    calls: Vec<JunctionCall>,
}

impl PolicyJudge {
    /// A judge for a solved world; `need_m` is the smallest passable mouth
    /// radius (body radius plus the required standoff).
    #[must_use]
    pub fn new(sc: &Scenario, g: &Geometry, flows_kg_per_s: &[f64], need_m: f64) -> Self {
        let arms: Vec<Arm> = g
            .conduits
            .iter()
            .enumerate()
            .map(|(c, cg)| Arm {
                ends: [cg.from, cg.to],
                flow_kg_per_s: flows_kg_per_s.get(c).copied().unwrap_or(0.0),
                mouth_m: [g.radius_at(c, 0.0), g.radius_at(c, cg.length_m)],
                length_m: cg.length_m,
            })
            .collect();
        let mut zone_m = vec![0.0_f64; sc.nodes.len()];
        for c in &g.conduits {
            for n in [c.from, c.to] {
                zone_m[n] = zone_m[n].max(1.5 * c.max_radius_m + 0.2);
            }
        }
        Self {
            arms,
            ids: sc.conduits.iter().map(|c| c.id.clone()).collect(),
            node_ids: sc.nodes.iter().map(|n| n.id.clone()).collect(),
            zone_m,
            need_m,
            deep: None,
            entered_from: None,
            learned_dead: Vec::new(),
            first_arrival: vec![None; sc.nodes.len()],
            calls: Vec::new(),
        }
    }

    /// The calls so far.
    #[must_use]
    pub fn calls(&self) -> &[JunctionCall] {
        &self.calls
    }

    /// Wrong calls so far.
    #[must_use]
    pub fn wrong(&self) -> u32 {
        u32::try_from(self.calls.iter().filter(|c| c.wrong).count()).unwrap_or(u32::MAX)
    }

    /// Whether station `s` of conduit `c` is past the junction zones of
    /// both its ends.
    #[must_use]
    pub fn is_deep(&self, c: usize, station_m: f64) -> bool {
        self.arms.get(c).is_some_and(|a| {
            station_m > self.zone_m[a.ends[0]] && a.length_m - station_m > self.zone_m[a.ends[1]]
        })
    }

    /// The head is at station `station_m` of conduit `c` (its most-inside
    /// conduit) at time `t`.
    pub fn observe(&mut self, t: f64, c: usize, station_m: f64) {
        if !self.is_deep(c, station_m) {
            return;
        }
        let Some(p) = self.deep else {
            self.deep = Some(c);
            return;
        };
        if p == c {
            return;
        }
        let shared = self.arms[p]
            .ends
            .into_iter()
            .find(|n| self.arms[c].ends.contains(n));
        if let Some(j) = shared {
            if self.entered_from == Some(j) && !self.learned_dead.contains(&(j, p)) {
                self.learned_dead.push((j, p));
            }
            if self.first_arrival[j].is_none() {
                self.first_arrival[j] = Some(p);
            }
            self.judge(t, j, p, c);
        }
        self.entered_from = shared;
        self.deep = Some(c);
    }

    /// Flow of conduit `c` toward node `j`, kg/s.
    fn inflow(&self, c: usize, j: usize) -> f64 {
        let a = &self.arms[c];
        if a.ends[1] == j {
            a.flow_kg_per_s
        } else {
            -a.flow_kg_per_s
        }
    }

    fn mouth(&self, c: usize, j: usize) -> f64 {
        let a = &self.arms[c];
        if a.ends[0] == j {
            a.mouth_m[0]
        } else {
            a.mouth_m[1]
        }
    }

    fn judge(&mut self, t: f64, j: usize, p: usize, c: usize) {
        let mut up: Vec<(f64, usize)> = (0..self.arms.len())
            .filter(|&k| k != p && self.arms[k].ends.contains(&j))
            .filter(|&k| self.mouth(k, j) > self.need_m)
            .filter(|&k| !self.learned_dead.contains(&(j, k)))
            .map(|k| (self.inflow(k, j), k))
            .filter(|(f, _)| *f > 0.0)
            .collect();
        up.sort_by(|a, b| b.0.total_cmp(&a.0).then(a.1.cmp(&b.1)));
        let (right, right_flow, next_flow) = match up.as_slice() {
            [] => match self.first_arrival[j] {
                Some(back) => (back, 0.0, 0.0),
                None => return,
            },
            [(f, k)] => (*k, *f, 0.0),
            [(f, k), (g, _), ..] => (*k, *f, *g),
        };
        let clear = right_flow > 0.0 && right_flow >= CLEAR_RATIO * next_flow;
        self.calls.push(JunctionCall {
            time_s: t,
            node: self.node_ids[j].clone(),
            arrived_via: self.ids[p].clone(),
            taken: self.ids[c].clone(),
            right: self.ids[right].clone(),
            right_flow_kg_per_s: right_flow,
            next_flow_kg_per_s: next_flow,
            clear,
            wrong: c != right,
        });
    }
}
