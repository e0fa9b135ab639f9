//! Steady flow through a conduit network by the global gradient algorithm
//! (Todini and Pilati, "A gradient algorithm for the analysis of pipe
//! networks", 1988).
//!
//! Unknowns are the pressures of the *free* nodes (junctions and mass-flow
//! sources) and the mass flows of the links; *fixed* nodes (reservoir
//! sources and exits) have a given pressure. Node pressures are total
//! pressures: velocity heads at nodes are neglected, as network models do.
//!
//! Each Newton step linearises every incompressible link's loss
//! `h(m) = p_from - p_to` about the current flow, `h(m) ~ h_k + G_k (m - m_k)`
//! with `G = dh/dm > 0`, so `m = y + (p_from - p_to)/G` with
//! `y = m_k - h_k/G`. Substituting into mass conservation at every free node
//! gives a symmetric positive definite system for the pressures (the Schur
//! complement form of the algorithm), solved densely (nalgebra Cholesky) or
//! by our own Jacobi-preconditioned conjugate gradients; the flows then
//! follow link by link and satisfy continuity to the linear solver's
//! precision.
//!
//! A compressible link must start at a reservoir (a fixed-pressure source):
//! its flow is the nozzle flow `m = F(p_to)` for the reservoir's stagnation
//! pressure ([`super::nozzle`]), linearised as `F + F' (p_to - p_to_k)` with
//! `F' <= 0` (zero when choked). It only adds to the diagonal, so the system
//! stays symmetric.
//!
//! Losses are Darcy–Weisbach, `dp = f (L/D) rho V^2 / 2`, summed over the
//! link's pieces (each with its own diameter), with [`super::friction`].

use nalgebra::{DMatrix, DVector};

use super::friction::{self, FrictionError, Regime};
use super::nozzle::{Nozzle, NozzleState};
use nav_core::gas::GasError;

/// Pressure or injection at a node.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum NodeCondition {
    /// Pressure unknown; `injection_kg_per_s` enters from outside (a
    /// mass-flow source; zero at a junction).
    Free {
        /// Mass flow injected, kg/s.
        injection_kg_per_s: f64,
    },
    /// Pressure given (reservoir source or exit), Pa.
    Fixed {
        /// The pressure, Pa.
        pressure_pa: f64,
    },
}

/// A straight stretch of an incompressible link.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LossPiece {
    /// Length, m.
    pub length_m: f64,
    /// Hydraulic diameter, m.
    pub diameter_m: f64,
}

/// How a link carries flow.
#[derive(Debug, Clone, PartialEq)]
pub enum LinkModel {
    /// Darcy–Weisbach over its pieces.
    Incompressible {
        /// Pieces in station order.
        pieces: Vec<LossPiece>,
        /// Absolute wall roughness, m.
        roughness_m: f64,
    },
    /// Isentropic nozzle fed by the reservoir at `from`.
    Compressible(Nozzle),
}

/// One link between two nodes (positive flow runs from `from` to `to`).
#[derive(Debug, Clone, PartialEq)]
pub struct Link {
    /// Upstream-end node index (station 0).
    pub from: usize,
    /// Far-end node index.
    pub to: usize,
    /// Flow model.
    pub model: LinkModel,
}

/// Which linear solver the pressure system uses.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum LinearSolver {
    /// Dense Cholesky up to 300 free nodes, conjugate gradients above.
    Auto,
    /// Dense Cholesky (nalgebra).
    Dense,
    /// Jacobi-preconditioned conjugate gradients on the link list.
    ConjugateGradient,
}

/// A network flow problem.
#[derive(Debug, Clone, PartialEq)]
pub struct FlowProblem {
    /// Node conditions.
    pub nodes: Vec<NodeCondition>,
    /// Links.
    pub links: Vec<Link>,
    /// Density used by incompressible links, kg/m^3.
    pub density_kg_per_m3: f64,
    /// Dynamic viscosity, Pa s.
    pub viscosity_pa_s: f64,
    /// Newton iteration cap.
    pub max_iterations: u32,
    /// Linear solver.
    pub solver: LinearSolver,
}

/// Solved state of one link.
#[derive(Debug, Clone, PartialEq)]
pub struct LinkSolution {
    /// Mass flow, kg/s, positive from `from` to `to`.
    pub mass_flow_kg_per_s: f64,
    /// Largest Reynolds number over the link's pieces.
    pub max_reynolds: f64,
    /// Regime at that piece.
    pub regime: Regime,
    /// Total-pressure drop from the `from` node to the end of each piece,
    /// Pa, in piece order (incompressible links; empty otherwise). The last
    /// entry equals `p_from - p_to`.
    pub cumulative_drop_pa: Vec<f64>,
    /// Compressible state, if the link is compressible.
    pub nozzle: Option<NozzleState>,
}

/// A solved network.
#[derive(Debug, Clone, PartialEq)]
pub struct FlowSolution {
    /// Pressure at every node, Pa.
    pub node_pressure_pa: Vec<f64>,
    /// Every link's state.
    pub links: Vec<LinkSolution>,
    /// Newton iterations used.
    pub iterations: u32,
    /// Largest node imbalance relative to that node's throughput.
    pub max_relative_imbalance: f64,
}

/// Why the network could not be solved.
#[derive(Debug, Clone, PartialEq)]
pub enum FlowError {
    /// No convergence within the cap.
    NoConvergence {
        /// Iterations spent.
        iterations: u32,
        /// Last relative flow change.
        relative_change: f64,
    },
    /// The pressure system is singular: a free node has no path to a fixed
    /// node (first free node of the failed factorisation).
    Singular,
    /// A friction factor failed on a link.
    Friction {
        /// Link index.
        link: usize,
        /// The failure.
        error: FrictionError,
    },
    /// A gas relation failed on a compressible link.
    Gas {
        /// Link index.
        link: usize,
        /// The failure.
        error: GasError,
    },
    /// A compressible link does not start at a fixed-pressure node.
    CompressibleNotFromReservoir {
        /// Link index.
        link: usize,
    },
    /// A value became non-finite.
    NonFinite {
        /// Link index.
        link: usize,
    },
    /// Mass balance missed the tolerance after convergence.
    Imbalance {
        /// Node index.
        node: usize,
        /// Relative imbalance.
        relative: f64,
    },
}

impl core::fmt::Display for FlowError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match self {
            Self::NoConvergence {
                iterations,
                relative_change,
            } => write!(
                f,
                "network flow did not converge in {iterations} iterations (last relative change {relative_change:.3e})"
            ),
            Self::Singular => write!(
                f,
                "pressure system singular: some junction has no path to a source or exit"
            ),
            Self::Friction { link, error } => write!(f, "link {link}: {error}"),
            Self::Gas { link, error } => write!(f, "link {link}: gas relation failed: {error:?}"),
            Self::CompressibleNotFromReservoir { link } => write!(
                f,
                "link {link}: a compressible conduit must start at a source with a stagnation pressure"
            ),
            Self::NonFinite { link } => write!(f, "link {link}: non-finite value"),
            Self::Imbalance { node, relative } => {
                write!(
                    f,
                    "node {node}: mass imbalance {relative:.3e} after convergence"
                )
            }
        }
    }
}

impl std::error::Error for FlowError {}

/// Relative flow change that ends the Newton iteration.
pub const FLOW_TOLERANCE: f64 = 1e-9;
/// Mass balance every node must meet, relative to its throughput (a
/// stagnant node: relative to the largest link flow).
pub const MASS_BALANCE_TOLERANCE: f64 = 1e-9;

struct LossEval {
    h: f64,
    g: f64,
    max_re: f64,
    regime: Regime,
}

fn piece_loss(
    p: &LossPiece,
    roughness_m: f64,
    rho: f64,
    mu: f64,
    m: f64,
) -> Result<(f64, f64, f64, Regime), FrictionError> {
    let d = p.diameter_m;
    let a = core::f64::consts::PI * d * d / 4.0;
    let re = m.abs() * d / (a * mu);
    if re <= friction::RE_LAMINAR_MAX {
        // Hagen–Poiseuille: dp = 8 pi mu L mdot / (rho A^2).
        let k = 8.0 * core::f64::consts::PI * mu * p.length_m / (rho * a * a);
        return Ok((k * m, k, re, Regime::Laminar));
    }
    let (f, df, regime) = friction::darcy(re, roughness_m / d)?;
    let c = p.length_m / (2.0 * rho * a * a * d);
    Ok((
        f * c * m * m.abs(),
        c * m.abs() * (2.0 * f + re * df),
        re,
        regime,
    ))
}

fn link_loss(
    pieces: &[LossPiece],
    roughness_m: f64,
    rho: f64,
    mu: f64,
    m: f64,
) -> Result<LossEval, FrictionError> {
    let mut out = LossEval {
        h: 0.0,
        g: 0.0,
        max_re: 0.0,
        regime: Regime::Laminar,
    };
    for p in pieces {
        let (h, g, re, r) = piece_loss(p, roughness_m, rho, mu, m)?;
        out.h += h;
        out.g += g;
        if re >= out.max_re {
            out.max_re = re;
            out.regime = r;
        }
    }
    Ok(out)
}

/// Symmetric system `diag x - sum_edges w (x_j e_i + x_i e_j) = b`.
struct System {
    diag: Vec<f64>,
    edges: Vec<(usize, usize, f64)>,
    rhs: Vec<f64>,
}

impl System {
    fn apply(&self, x: &[f64], y: &mut [f64]) {
        for (yi, (d, xi)) in y.iter_mut().zip(self.diag.iter().zip(x)) {
            *yi = d * xi;
        }
        for &(i, j, w) in &self.edges {
            y[i] -= w * x[j];
            y[j] -= w * x[i];
        }
    }

    fn solve_dense(&self) -> Option<Vec<f64>> {
        let n = self.diag.len();
        let mut a = DMatrix::<f64>::zeros(n, n);
        for (i, d) in self.diag.iter().enumerate() {
            a[(i, i)] = *d;
        }
        for &(i, j, w) in &self.edges {
            a[(i, j)] -= w;
            a[(j, i)] -= w;
        }
        let chol = a.cholesky()?;
        let x = chol.solve(&DVector::from_column_slice(&self.rhs));
        Some(x.iter().copied().collect())
    }

    /// Jacobi-preconditioned conjugate gradients from `x0`.
    fn solve_cg(&self, x0: &[f64]) -> Option<Vec<f64>> {
        let n = self.diag.len();
        if self.diag.iter().any(|d| d.is_nan() || *d <= 0.0) {
            return None;
        }
        let bnorm = libm::sqrt(self.rhs.iter().map(|v| v * v).sum::<f64>());
        let mut x = x0.to_vec();
        let mut ax = vec![0.0; n];
        self.apply(&x, &mut ax);
        let mut r: Vec<f64> = self.rhs.iter().zip(&ax).map(|(b, a)| b - a).collect();
        let mut z: Vec<f64> = r.iter().zip(&self.diag).map(|(r, d)| r / d).collect();
        let mut p = z.clone();
        let mut rz: f64 = r.iter().zip(&z).map(|(a, b)| a * b).sum();
        let mut ap = vec![0.0; n];
        let cap = 20 * n + 200;
        let tol = 1e-15 * bnorm.max(1e-300);
        for _ in 0..cap {
            let rn = libm::sqrt(r.iter().map(|v| v * v).sum::<f64>());
            if rn <= tol {
                return Some(x);
            }
            self.apply(&p, &mut ap);
            let pap: f64 = p.iter().zip(&ap).map(|(a, b)| a * b).sum();
            if pap.is_nan() || pap <= 0.0 {
                return None;
            }
            let alpha = rz / pap;
            for i in 0..n {
                x[i] += alpha * p[i];
                r[i] -= alpha * ap[i];
                z[i] = r[i] / self.diag[i];
            }
            let rz_new: f64 = r.iter().zip(&z).map(|(a, b)| a * b).sum();
            let beta = rz_new / rz;
            rz = rz_new;
            for i in 0..n {
                p[i] = z[i] + beta * p[i];
            }
        }
        // Accept a stalled solve only if it is already tight.
        let rn = libm::sqrt(r.iter().map(|v| v * v).sum::<f64>());
        (rn <= 1e-12 * bnorm.max(1e-300)).then_some(x)
    }
}

impl FlowProblem {
    /// Solve the network.
    ///
    /// # Errors
    /// [`FlowError`] when a link model fails, the system is singular, or the
    /// iteration or mass balance misses its tolerance.
    #[allow(clippy::too_many_lines)]
    pub fn solve(&self) -> Result<FlowSolution, FlowError> {
        let nn = self.nodes.len();
        let mut free_index = vec![usize::MAX; nn];
        let mut nfree = 0;
        let mut p = vec![0.0; nn];
        let mut fixed_sum = 0.0;
        let mut nfixed = 0.0;
        for (i, c) in self.nodes.iter().enumerate() {
            match c {
                NodeCondition::Free { .. } => {
                    free_index[i] = nfree;
                    nfree += 1;
                }
                NodeCondition::Fixed { pressure_pa } => {
                    p[i] = *pressure_pa;
                    fixed_sum += pressure_pa;
                    nfixed += 1.0;
                }
            }
        }
        // Work in gauge pressure about the mean fixed pressure: differences
        // of a few pascals on 1e5 Pa would otherwise lose digits.
        let p_ref = if nfixed > 0.0 {
            fixed_sum / nfixed
        } else {
            0.0
        };
        for (i, c) in self.nodes.iter().enumerate() {
            p[i] = match c {
                NodeCondition::Free { .. } => 0.0,
                NodeCondition::Fixed { pressure_pa } => pressure_pa - p_ref,
            };
        }
        let p_mean = 0.0;
        for (j, l) in self.links.iter().enumerate() {
            if matches!(l.model, LinkModel::Compressible(_))
                && !matches!(self.nodes[l.from], NodeCondition::Fixed { .. })
            {
                return Err(FlowError::CompressibleNotFromReservoir { link: j });
            }
        }
        let rho = self.density_kg_per_m3;
        let mu = self.viscosity_pa_s;
        // Initial flows: 0.1 m/s through the mean section.
        let mut q: Vec<f64> = self
            .links
            .iter()
            .map(|l| match &l.model {
                LinkModel::Incompressible { pieces, .. } => {
                    let d = pieces.iter().map(|p| p.diameter_m).sum::<f64>()
                        / pieces.len().max(1) as f64;
                    rho * core::f64::consts::PI * d * d / 4.0 * 0.1
                }
                LinkModel::Compressible(_) => 0.0,
            })
            .collect();
        let mut y = vec![0.0; self.links.len()];
        let mut w = vec![0.0; self.links.len()];
        let mut x_prev = vec![p_mean; nfree];
        let mut iterations = 0;
        let mut rel_change = f64::INFINITY;
        let mut converged = false;
        while iterations < self.max_iterations {
            iterations += 1;
            let mut sys = System {
                diag: vec![0.0; nfree],
                edges: Vec::with_capacity(self.links.len()),
                rhs: vec![0.0; nfree],
            };
            for (i, c) in self.nodes.iter().enumerate() {
                if let NodeCondition::Free { injection_kg_per_s } = c {
                    sys.rhs[free_index[i]] += injection_kg_per_s;
                }
            }
            for (j, l) in self.links.iter().enumerate() {
                let (a, b) = (l.from, l.to);
                match &l.model {
                    LinkModel::Incompressible {
                        pieces,
                        roughness_m,
                    } => {
                        let e = link_loss(pieces, *roughness_m, rho, mu, q[j])
                            .map_err(|error| FlowError::Friction { link: j, error })?;
                        if !(e.g > 0.0 && e.g.is_finite() && e.h.is_finite()) {
                            return Err(FlowError::NonFinite { link: j });
                        }
                        w[j] = 1.0 / e.g;
                        y[j] = q[j] - e.h / e.g;
                        let (fa, fb) = (free_index[a], free_index[b]);
                        // Row n: sum w p_n - sum w p_other = inj - sum_out y + sum_in y.
                        if fa != usize::MAX {
                            sys.diag[fa] += w[j];
                            sys.rhs[fa] -= y[j];
                            if fb == usize::MAX {
                                sys.rhs[fa] += w[j] * p[b];
                            }
                        }
                        if fb != usize::MAX {
                            sys.diag[fb] += w[j];
                            sys.rhs[fb] += y[j];
                            if fa == usize::MAX {
                                sys.rhs[fb] += w[j] * p[a];
                            }
                        }
                        if fa != usize::MAX && fb != usize::MAX {
                            sys.edges.push((fa, fb, w[j]));
                        }
                    }
                    LinkModel::Compressible(nz) => {
                        let (f, fp) = nz
                            .flow(p[a] + p_ref, p[b] + p_ref)
                            .map_err(|error| FlowError::Gas { link: j, error })?;
                        // m = f + fp (p_b - p_b_k): y = f - fp p_b_k, slope fp <= 0.
                        w[j] = fp;
                        y[j] = f - fp * p[b]; // gauge p_b
                        let fb = free_index[b];
                        if fb != usize::MAX {
                            sys.diag[fb] -= fp;
                            sys.rhs[fb] += y[j];
                        }
                    }
                }
            }
            let x = if nfree == 0 {
                Vec::new()
            } else {
                let dense = match self.solver {
                    LinearSolver::Dense => true,
                    LinearSolver::ConjugateGradient => false,
                    LinearSolver::Auto => nfree <= 300,
                };
                let sol = if dense {
                    sys.solve_dense()
                } else {
                    sys.solve_cg(&x_prev).or_else(|| sys.solve_dense())
                };
                sol.ok_or(FlowError::Singular)?
            };
            for (i, fi) in free_index.iter().enumerate() {
                if *fi != usize::MAX {
                    p[i] = x[*fi];
                }
            }
            x_prev = x;
            let mut dmax: f64 = 0.0;
            let mut qmax: f64 = 0.0;
            for (j, l) in self.links.iter().enumerate() {
                let qn = match l.model {
                    LinkModel::Incompressible { .. } => y[j] + w[j] * (p[l.from] - p[l.to]),
                    LinkModel::Compressible(_) => y[j] + w[j] * p[l.to],
                };
                if !qn.is_finite() {
                    return Err(FlowError::NonFinite { link: j });
                }
                dmax = dmax.max((qn - q[j]).abs());
                qmax = qmax.max(qn.abs());
                q[j] = qn;
            }
            rel_change = dmax / qmax.max(1e-30);
            if rel_change <= FLOW_TOLERANCE || qmax < 1e-30 {
                converged = true;
                break;
            }
        }
        if !converged {
            return Err(FlowError::NoConvergence {
                iterations,
                relative_change: rel_change,
            });
        }
        // Mass balance at every free node.
        let mut resid = vec![0.0; nn];
        let mut through = vec![0.0; nn];
        for (i, c) in self.nodes.iter().enumerate() {
            if let NodeCondition::Free { injection_kg_per_s } = c {
                resid[i] += injection_kg_per_s;
                through[i] += injection_kg_per_s.abs();
            }
        }
        let mut qref: f64 = 0.0;
        for (j, l) in self.links.iter().enumerate() {
            resid[l.from] -= q[j];
            resid[l.to] += q[j];
            through[l.from] += q[j].abs();
            through[l.to] += q[j].abs();
            qref = qref.max(q[j].abs());
        }
        let mut max_rel: f64 = 0.0;
        for (i, c) in self.nodes.iter().enumerate() {
            if matches!(c, NodeCondition::Free { .. }) {
                // Half the throughput is the flow through the node. A
                // stagnant node (a blind end: throughput below a thousandth
                // of the largest link flow) is measured against the largest
                // link flow instead: its residual is rounding in the
                // pressure differences, not lost mass.
                let half = 0.5 * through[i];
                let scale = if half < 1e-3 * qref { qref } else { half }.max(1e-300);
                let rel = resid[i].abs() / scale;
                max_rel = max_rel.max(rel);
                if rel > MASS_BALANCE_TOLERANCE {
                    return Err(FlowError::Imbalance {
                        node: i,
                        relative: rel,
                    });
                }
            }
        }
        let mut links = Vec::with_capacity(self.links.len());
        for (j, l) in self.links.iter().enumerate() {
            match &l.model {
                LinkModel::Incompressible {
                    pieces,
                    roughness_m,
                } => {
                    let mut cum = Vec::with_capacity(pieces.len());
                    let mut acc = 0.0;
                    let mut max_re: f64 = 0.0;
                    let mut regime = Regime::Laminar;
                    for pc in pieces {
                        let (h, _, re, r) = piece_loss(pc, *roughness_m, rho, mu, q[j])
                            .map_err(|error| FlowError::Friction { link: j, error })?;
                        acc += h;
                        cum.push(acc);
                        if re >= max_re {
                            max_re = re;
                            regime = r;
                        }
                    }
                    // Scale so the last entry meets the node pressures exactly.
                    let target = p[l.from] - p[l.to];
                    if acc.abs() > 0.0 {
                        let k = target / acc;
                        for c in &mut cum {
                            *c *= k;
                        }
                    }
                    links.push(LinkSolution {
                        mass_flow_kg_per_s: q[j],
                        max_reynolds: max_re,
                        regime,
                        cumulative_drop_pa: cum,
                        nozzle: None,
                    });
                }
                LinkModel::Compressible(nz) => {
                    let st = nz
                        .solve(p[l.from] + p_ref, p[l.to] + p_ref)
                        .map_err(|error| FlowError::Gas { link: j, error })?;
                    links.push(LinkSolution {
                        mass_flow_kg_per_s: st.mass_flow_kg_per_s,
                        max_reynolds: 0.0,
                        regime: Regime::Turbulent,
                        cumulative_drop_pa: Vec::new(),
                        nozzle: Some(st),
                    });
                }
            }
        }
        for v in &mut p {
            *v += p_ref;
        }
        Ok(FlowSolution {
            node_pressure_pa: p,
            links,
            iterations,
            max_relative_imbalance: max_rel,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn pipe(from: usize, to: usize, l: f64, d: f64) -> Link {
        Link {
            from,
            to,
            model: LinkModel::Incompressible {
                pieces: vec![LossPiece {
                    length_m: l,
                    diameter_m: d,
                }],
                roughness_m: 1e-4,
            },
        }
    }

    #[test]
    fn series_and_dead_end() {
        // 0 (fixed) -> 1 -> 2 (fixed), plus a dead end 1 -> 3.
        let prob = FlowProblem {
            nodes: vec![
                NodeCondition::Fixed {
                    pressure_pa: 101_400.0,
                },
                NodeCondition::Free {
                    injection_kg_per_s: 0.0,
                },
                NodeCondition::Fixed {
                    pressure_pa: 101_300.0,
                },
                NodeCondition::Free {
                    injection_kg_per_s: 0.0,
                },
            ],
            links: vec![
                pipe(0, 1, 10.0, 0.5),
                pipe(1, 2, 20.0, 0.5),
                pipe(1, 3, 5.0, 0.3),
            ],
            density_kg_per_m3: 1.2,
            viscosity_pa_s: 1.8e-5,
            max_iterations: 100,
            solver: LinearSolver::Dense,
        };
        let s = prob.solve().unwrap();
        let q = &s.links;
        assert!(
            (q[0].mass_flow_kg_per_s - q[1].mass_flow_kg_per_s).abs()
                < 1e-9 * q[0].mass_flow_kg_per_s
        );
        assert!(q[2].mass_flow_kg_per_s.abs() < 1e-9 * q[0].mass_flow_kg_per_s);
        // Same pipe, same flow: the drop splits 1:2 by length.
        let p1 = s.node_pressure_pa[1];
        assert!(((101_400.0 - p1) / (p1 - 101_300.0) - 0.5).abs() < 1e-8);
        // The CG path gives the same answer.
        let cg = FlowProblem {
            solver: LinearSolver::ConjugateGradient,
            ..prob
        }
        .solve()
        .unwrap();
        assert!((cg.node_pressure_pa[1] - p1).abs() < 1e-6);
    }
}
