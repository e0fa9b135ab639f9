//! The solved world: geometry, network flow, and the local flow field a
//! probe sees anywhere inside the conduits.
//!
//! Local field inside a conduit, at a point at distance `rho` from the
//! centreline where the radius is `R` (`xi = rho / R`):
//! - incompressible conduits: mean velocity `V = mdot / (rho_gas A)`; the
//!   axial velocity follows the laminar parabola `u = 2 V (1 - xi^2)` below
//!   Re 2300, the 1/7 power law `u = (60/49) V (1 - xi)^(1/7)` above
//!   Re 4000 (mean over centre 49/60 for n = 7), linearly blended between.
//!   Total pressure falls along the conduit with the Darcy–Weisbach losses;
//!   static pressure is total minus `rho V^2 / 2` (uniform over the
//!   section); local total pressure is static plus `rho u^2 / 2`.
//! - compressible conduits: the quasi-1-D isentropic state is the inviscid
//!   core, `u = V_1D (1 - xi)^(1/12)` (a thin wall layer; its displacement
//!   is not fed back into the 1-D solution), static pressure, density and
//!   temperature from the local Mach number and the local stagnation state.
//! - where the section changes, a radial component `u xi dR/ds` keeps the
//!   streamlines parallel to the wall.
//! - mixing zones: where a point lies inside several conduits' tubes (at a
//!   junction, where their end spheres overlap; also at a bend between two
//!   pieces of one conduit) the samples of each are blended with weights
//!   `(clearance / R)^2`, zero on each tube's wall, so the field is
//!   continuous.

use super::friction::{RE_LAMINAR_MAX, RE_TURBULENT_MIN};
use super::geometry::{Geometry, Hit};
use super::network::{
    FlowError, FlowProblem, FlowSolution, LinearSolver, Link, LinkModel, LossPiece, NodeCondition,
};
use super::nozzle::{Nozzle, NozzleError};
use super::scenario::{NodeKind, Scenario};
use super::vec3::{self, V3};
use nav_core::gas::IdealGas;

/// The gas state at a point.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FlowSample {
    /// Gas velocity, map frame, m/s.
    pub velocity_m_per_s: V3,
    /// Static pressure, Pa.
    pub static_pressure_pa: f64,
    /// Local total (stagnation) pressure, Pa.
    pub total_pressure_pa: f64,
    /// Density, kg/m^3.
    pub density_kg_per_m3: f64,
    /// Static temperature, K.
    pub static_temperature_k: f64,
    /// Total temperature, K.
    pub total_temperature_k: f64,
    /// Local Mach number.
    pub mach: f64,
    /// The conduit with the largest blend weight, if inside any.
    pub conduit: Option<u32>,
}

#[derive(Debug, Clone)]
enum ConduitFlow {
    Incompressible {
        mdot: f64,
        /// Total-pressure drop from `from` at each piece's start and end.
        drop_start: Vec<f64>,
        drop_end: Vec<f64>,
        p_from: f64,
    },
    Compressible {
        stations: Vec<f64>,
        mach: Vec<f64>,
        p0: Vec<f64>,
        t0: f64,
        /// +1 (flow toward increasing station) or 0 (no flow).
        sign: f64,
    },
}

/// Why a world could not be built.
#[derive(Debug, Clone, PartialEq)]
pub enum WorldError {
    /// The network flow failed.
    Flow(FlowError),
    /// A compressible conduit's nozzle model failed.
    Nozzle {
        /// Conduit id.
        conduit: String,
        /// The failure.
        error: NozzleError,
    },
}

impl core::fmt::Display for WorldError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match self {
            Self::Flow(e) => write!(f, "flow solver: {e}"),
            Self::Nozzle { conduit, error } => write!(f, "conduit {conduit:?}: {error}"),
        }
    }
}

impl std::error::Error for WorldError {}

/// Geometry plus solved flow.
#[derive(Debug, Clone)]
pub struct World {
    /// The geometry.
    pub geometry: Geometry,
    /// The network solution.
    pub solution: FlowSolution,
    /// The flow problem it solved.
    pub problem: FlowProblem,
    gas: IdealGas,
    temperature_k: f64,
    density: f64,
    cp: f64,
    flows: Vec<ConduitFlow>,
    piece_start: Vec<usize>,
}

/// Longest loss sub-piece, m.
const LOSS_PIECE_MAX_M: f64 = 0.5;
/// Station spacing of compressible conduits, m.
const NOZZLE_STATION_M: f64 = 0.02;

impl World {
    /// Solve a scenario's world.
    ///
    /// # Errors
    /// [`WorldError`] when the flow cannot be solved.
    pub fn new(sc: &Scenario) -> Result<Self, WorldError> {
        let geometry = Geometry::new(&sc.shapes());
        let gas = sc.gas.ideal_gas();
        let t = sc.gas.temperature_k;
        let exits: Vec<f64> = sc
            .nodes
            .iter()
            .filter_map(|n| match n.kind {
                NodeKind::Exit {
                    ambient_pressure_pa,
                } => Some(ambient_pressure_pa),
                _ => None,
            })
            .collect();
        let p_ref = exits.iter().sum::<f64>() / exits.len().max(1) as f64;
        let density = p_ref / (gas.r_j_per_kg_k() * t);
        let nodes = sc
            .nodes
            .iter()
            .map(|n| match n.kind {
                NodeKind::Junction => NodeCondition::Free {
                    injection_kg_per_s: 0.0,
                },
                NodeKind::MassFlowSource { mass_flow_kg_per_s } => NodeCondition::Free {
                    injection_kg_per_s: mass_flow_kg_per_s,
                },
                NodeKind::ReservoirSource {
                    stagnation_pressure_pa,
                } => NodeCondition::Fixed {
                    pressure_pa: stagnation_pressure_pa,
                },
                NodeKind::Exit {
                    ambient_pressure_pa,
                } => NodeCondition::Fixed {
                    pressure_pa: ambient_pressure_pa,
                },
            })
            .collect();
        let mut links = Vec::with_capacity(sc.conduits.len());
        let mut piece_start = Vec::with_capacity(sc.conduits.len());
        for (ci, c) in sc.conduits.iter().enumerate() {
            let g = &geometry.conduits[ci];
            piece_start.push(g.pieces.start);
            let model = if c.compressible {
                let mut st = Vec::new();
                let mut ar = Vec::new();
                for p in &geometry.pieces[g.pieces.clone()] {
                    let n = (p.len_m / NOZZLE_STATION_M).ceil().max(1.0) as usize;
                    for k in 0..n {
                        let t = p.len_m * k as f64 / n as f64;
                        st.push(p.s0_m + t);
                        let r = p.radius_at(t);
                        ar.push(core::f64::consts::PI * r * r);
                    }
                }
                st.push(g.length_m);
                let r = geometry.radius_at(ci, g.length_m);
                ar.push(core::f64::consts::PI * r * r);
                let nz = Nozzle::new(st, ar, gas, t).map_err(|error| WorldError::Nozzle {
                    conduit: c.id.clone(),
                    error,
                })?;
                LinkModel::Compressible(nz)
            } else {
                let mut pieces = Vec::new();
                for p in &geometry.pieces[g.pieces.clone()] {
                    let n = (p.len_m / LOSS_PIECE_MAX_M).ceil().max(1.0);
                    let k = n as usize;
                    for i in 0..k {
                        let mid = p.len_m * (i as f64 + 0.5) / n;
                        pieces.push(LossPiece {
                            length_m: p.len_m / n,
                            diameter_m: 2.0 * p.radius_at(mid),
                        });
                    }
                }
                LinkModel::Incompressible {
                    pieces,
                    roughness_m: c.roughness_m,
                }
            };
            links.push(Link {
                from: c.shape.from,
                to: c.shape.to,
                model,
            });
        }
        let problem = FlowProblem {
            nodes,
            links,
            density_kg_per_m3: density,
            viscosity_pa_s: sc.gas.viscosity_pa_s,
            max_iterations: 100,
            solver: LinearSolver::Auto,
        };
        let solution = problem.solve().map_err(WorldError::Flow)?;
        let mut flows = Vec::with_capacity(sc.conduits.len());
        for (ci, ls) in solution.links.iter().enumerate() {
            let g = &geometry.conduits[ci];
            if let Some(nz) = &ls.nozzle {
                let LinkModel::Compressible(noz) = &problem.links[ci].model else {
                    continue;
                };
                flows.push(ConduitFlow::Compressible {
                    stations: noz.stations_m.clone(),
                    mach: nz.mach.clone(),
                    p0: nz.p0_pa.clone(),
                    t0: nz.t0_k,
                    sign: if nz.mass_flow_kg_per_s > 0.0 {
                        1.0
                    } else {
                        0.0
                    },
                });
            } else {
                // Map sub-piece cumulative drops back to geometry pieces.
                let mut drop_start = Vec::new();
                let mut drop_end = Vec::new();
                let mut k = 0;
                let mut prev = 0.0;
                for p in &geometry.pieces[g.pieces.clone()] {
                    let n = (p.len_m / LOSS_PIECE_MAX_M).ceil().max(1.0) as usize;
                    k += n;
                    let end = ls.cumulative_drop_pa.get(k - 1).copied().unwrap_or(prev);
                    drop_start.push(prev);
                    drop_end.push(end);
                    prev = end;
                }
                flows.push(ConduitFlow::Incompressible {
                    mdot: ls.mass_flow_kg_per_s,
                    drop_start,
                    drop_end,
                    p_from: solution.node_pressure_pa[sc.conduits[ci].shape.from],
                });
            }
        }
        let gm = gas.gamma();
        Ok(Self {
            geometry,
            solution,
            problem,
            gas,
            temperature_k: t,
            density,
            cp: gm * gas.r_j_per_kg_k() / (gm - 1.0),
            flows,
            piece_start,
        })
    }

    /// The gas.
    #[must_use]
    pub fn gas(&self) -> IdealGas {
        self.gas
    }

    /// Density used in incompressible conduits, kg/m^3.
    #[must_use]
    pub fn density_kg_per_m3(&self) -> f64 {
        self.density
    }

    /// Mass flow of conduit `c`, kg/s (positive from its `from` node).
    #[must_use]
    pub fn mass_flow_kg_per_s(&self, c: usize) -> f64 {
        self.solution.links[c].mass_flow_kg_per_s
    }

    /// The field sampled in one conduit at a hit (inside it).
    fn sample_hit(&self, h: &Hit) -> FlowSample {
        let c = h.conduit as usize;
        let piece = &self.geometry.pieces[h.piece as usize];
        let r = h.radius_m.max(1e-12);
        let xi = (h.rho_m / r).clamp(0.0, 1.0);
        let e_r = if h.rho_m > 1e-12 {
            vec3::scale(h.offset, 1.0 / h.rho_m)
        } else {
            [0.0; 3]
        };
        let dir_with = |u: f64| {
            let along = vec3::axpy(piece.dir, xi * piece.dr_ds(), e_r);
            vec3::scale(along, u)
        };
        let gm = self.gas.gamma();
        match &self.flows[c] {
            ConduitFlow::Incompressible {
                mdot,
                drop_start,
                drop_end,
                p_from,
            } => {
                let a = core::f64::consts::PI * r * r;
                let v_mean = mdot / (self.density * a);
                let re = mdot.abs() * 2.0 * r / (a * self.problem.viscosity_pa_s);
                let lam = 2.0 * (1.0 - xi * xi);
                let tur = 60.0 / 49.0 * libm::pow(1.0 - xi, 1.0 / 7.0);
                let w =
                    ((re - RE_LAMINAR_MAX) / (RE_TURBULENT_MIN - RE_LAMINAR_MAX)).clamp(0.0, 1.0);
                let u = v_mean * ((1.0 - w) * lam + w * tur);
                let k = (h.piece as usize) - self.piece_start[c];
                let f = if piece.len_m > 0.0 {
                    h.t_m / piece.len_m
                } else {
                    0.0
                };
                let drop = drop_start[k] + f * (drop_end[k] - drop_start[k]);
                let p_total_mean = p_from - drop;
                let p_static = p_total_mean - 0.5 * self.density * v_mean * v_mean;
                let vel = dir_with(u);
                let speed2 = vec3::dot(vel, vel);
                let a_snd = libm::sqrt(gm * self.gas.r_j_per_kg_k() * self.temperature_k);
                FlowSample {
                    velocity_m_per_s: vel,
                    static_pressure_pa: p_static,
                    total_pressure_pa: p_static + 0.5 * self.density * speed2,
                    density_kg_per_m3: self.density,
                    static_temperature_k: self.temperature_k,
                    total_temperature_k: self.temperature_k + 0.5 * speed2 / self.cp,
                    mach: libm::sqrt(speed2) / a_snd,
                    conduit: Some(h.conduit),
                }
            }
            ConduitFlow::Compressible {
                stations,
                mach,
                p0,
                t0,
                sign,
            } => {
                let s = h.station_m;
                let i = stations
                    .partition_point(|&x| x <= s)
                    .clamp(1, stations.len() - 1);
                let (s0, s1) = (stations[i - 1], stations[i]);
                let f = if s1 > s0 {
                    ((s - s0) / (s1 - s0)).clamp(0.0, 1.0)
                } else {
                    0.0
                };
                let m_core = mach[i - 1] + f * (mach[i] - mach[i - 1]);
                // Local stagnation pressure: no blending across the shock.
                let p0_loc = if f < 0.5 { p0[i - 1] } else { p0[i] };
                let m_loc = m_core * sign * libm::pow(1.0 - xi, 1.0 / 12.0);
                let tr = 1.0 + 0.5 * (gm - 1.0) * m_core * m_core;
                let p_static = p0_loc / libm::pow(tr, gm / (gm - 1.0));
                let t_static = t0 / tr;
                let a_snd = libm::sqrt(gm * self.gas.r_j_per_kg_k() * t_static);
                let u = m_loc * a_snd;
                let vel = dir_with(u);
                let ml = libm::sqrt(vec3::dot(vel, vel)) / a_snd;
                let tl = 1.0 + 0.5 * (gm - 1.0) * ml * ml;
                FlowSample {
                    velocity_m_per_s: vel,
                    static_pressure_pa: p_static,
                    total_pressure_pa: p_static * libm::pow(tl, gm / (gm - 1.0)),
                    density_kg_per_m3: p_static / (self.gas.r_j_per_kg_k() * t_static),
                    static_temperature_k: t_static,
                    total_temperature_k: t_static * tl,
                    mach: ml,
                    conduit: Some(h.conduit),
                }
            }
        }
    }

    /// The gas state at `p` (map frame). Outside every conduit: still gas at
    /// the nearest conduit's static state, with `conduit = None`.
    ///
    /// Every piece whose tube contains `p` contributes with weight
    /// `(clearance / R)^2`, which is zero on its wall: the blend is
    /// continuous across junctions (the mixing zones) and across the bends
    /// between a conduit's own pieces.
    #[must_use]
    pub fn sample(&self, p: V3) -> FlowSample {
        let mut acc: Option<(FlowSample, f64)> = None;
        let mut best_w = 0.0;
        let mut best_c = None;
        let mut nearest: Option<Hit> = None;
        let mut contributors = 0;
        for &pi in self.geometry.candidates(p) {
            let h = self.geometry.pieces[pi as usize].locate(pi, p);
            if nearest.is_none_or(|b| h.clearance_m > b.clearance_m) {
                nearest = Some(h);
            }
            if h.clearance_m <= 0.0 {
                continue;
            }
            let w0 = h.clearance_m / h.radius_m;
            let w = w0 * w0;
            let s = self.sample_hit(&h);
            if w > best_w {
                best_w = w;
                best_c = Some(h.conduit);
            }
            contributors += 1;
            acc = Some(match acc {
                None => (scaled(&s, w), w),
                Some((a, wa)) => (add_scaled(&a, &s, w), wa + w),
            });
        }
        match acc {
            Some((a, w)) => {
                let mut s = scaled(&a, 1.0 / w);
                s.conduit = best_c;
                if contributors > 1 {
                    // Mach of the blended velocity.
                    let speed = vec3::norm(s.velocity_m_per_s);
                    let a_snd =
                        libm::sqrt(self.gas.gamma() * s.static_pressure_pa / s.density_kg_per_m3);
                    s.mach = speed / a_snd;
                }
                s
            }
            None => {
                let mut s = nearest.map_or_else(
                    || self.still(),
                    |h| {
                        let mut h2 = h;
                        h2.rho_m = 0.0;
                        h2.offset = [0.0; 3];
                        self.sample_hit(&h2)
                    },
                );
                s.velocity_m_per_s = [0.0; 3];
                s.total_pressure_pa = s.static_pressure_pa;
                s.total_temperature_k = s.static_temperature_k;
                s.mach = 0.0;
                s.conduit = None;
                s
            }
        }
    }

    fn still(&self) -> FlowSample {
        let p = self.density * self.gas.r_j_per_kg_k() * self.temperature_k;
        FlowSample {
            velocity_m_per_s: [0.0; 3],
            static_pressure_pa: p,
            total_pressure_pa: p,
            density_kg_per_m3: self.density,
            static_temperature_k: self.temperature_k,
            total_temperature_k: self.temperature_k,
            mach: 0.0,
            conduit: None,
        }
    }
}

fn scaled(s: &FlowSample, w: f64) -> FlowSample {
    FlowSample {
        velocity_m_per_s: vec3::scale(s.velocity_m_per_s, w),
        static_pressure_pa: s.static_pressure_pa * w,
        total_pressure_pa: s.total_pressure_pa * w,
        density_kg_per_m3: s.density_kg_per_m3 * w,
        static_temperature_k: s.static_temperature_k * w,
        total_temperature_k: s.total_temperature_k * w,
        mach: s.mach * w,
        conduit: s.conduit,
    }
}

fn add_scaled(a: &FlowSample, s: &FlowSample, w: f64) -> FlowSample {
    let b = scaled(s, w);
    FlowSample {
        velocity_m_per_s: vec3::add(a.velocity_m_per_s, b.velocity_m_per_s),
        static_pressure_pa: a.static_pressure_pa + b.static_pressure_pa,
        total_pressure_pa: a.total_pressure_pa + b.total_pressure_pa,
        density_kg_per_m3: a.density_kg_per_m3 + b.density_kg_per_m3,
        static_temperature_k: a.static_temperature_k + b.static_temperature_k,
        total_temperature_k: a.total_temperature_k + b.total_temperature_k,
        mach: a.mach + b.mach,
        conduit: a.conduit,
    }
}
