//! Windowed flow estimate for weak air: many frames of port pressures
//! where one frame cannot resolve the flow.
//!
//! Mine ventilation and cave draughts often move at 0.2 to 0.5 m/s, where
//! the dynamic pressure (about 0.02 to 0.15 Pa in air) is within a few
//! times the port noise, and the single-frame solver withholds the
//! direction (its low-flow guard). The noise of an average falls as the
//! square root of the number of samples, so a few seconds of frames can
//! resolve what one frame cannot. [`FlowWindow`] keeps that evidence in a
//! fixed-size information form (no frames are stored, no heap).
//!
//! # Model
//! The sphere potential-flow law the probe solver also uses,
//! `p_i = p_s + q_rel (1 - 9/4 sin^2 theta_i)`, written for the *gas*
//! velocity `w` (map frame, m/s) seen from a head moving at `v_h`: with
//! `v_rel = w - v_h` and the port normal `n_i` rotated into the map frame,
//!
//! `p_i = p_s - 5/8 rho |v_rel|^2 + 9/8 rho (n_i . v_rel)^2`
//!
//! `    = c + 9/8 rho n_i^T (w w^T) n_i - 9/4 rho (n_i . v_h)(n_i . w) + 9/8 rho (n_i . v_h)^2`.
//!
//! The last term is known; the cross term is taken from the current
//! estimate of `w` (zero before there is one). Relaxing `w w^T` to a free
//! symmetric matrix `M` makes what is left *linear* in the five entries of
//! `M`'s trace-free part (the trace cannot be told from the static
//! pressure because `|n| = 1`), plus one nuisance constant `c` per frame
//! (static pressure and everything common to all ports), which is removed
//! exactly by centring each frame's rows on their weighted mean (the
//! frame's own least-squares constant), so a drifting static pressure (a
//! climb, the pressure drop along the conduit) costs nothing. Each
//! frame's rows go into the normal equations with port weights
//! `1 / sigma_i^2`. The head's rotation is accounted for because the
//! normals are rotated into the map frame before they are used; its
//! motion through the known and cross terms.
//!
//! From the estimate: `M`'s dominant eigenvector is the flow axis; for a
//! rank-one `M = w w^T` the trace-free part has eigenvalues
//! `(2/3, -1/3, -1/3) |w|^2`, so `|w|^2 = 3/2 lambda_1` and the gas dynamic
//! pressure is `q = 3/4 rho lambda_1`.
//!
//! The pressures of a flow and of its reverse are the same for a head at
//! rest (the law depends on `sin^2`). A moving head breaks the tie: `w`
//! and `-w` predict different relative flows `+-w - v_h`. Each frame adds
//! the log-likelihood ratio of the two senses (Gaussian port noise) to a
//! running sum that fades and is discounted with the rest of the
//! evidence, a sequential probability-ratio test (Wald 1945); past
//! [`SENSE_LOG_RATIO`] the sense is taken from it. Before that it is the
//! last estimate's, or, with none, the convention the single-frame solver
//! uses (the flow arrives at the face the probe points at).
//!
//! # Covariance and evidence
//! The parameter covariance is the inverse of the accumulated information
//! (port sigmas as configured), carried to the direction and dynamic
//! pressure to first order through the eigen-decomposition (perturbation
//! of a symmetric matrix's eigenvector,
//! `de_1 = sum_k (e_k^T dM e_1) / (lambda_1 - lambda_k) e_k`). Without
//! forgetting (`memory_s` infinite) and for frames of the same geometry
//! it is the single-frame covariance over the number of frames, the
//! variance of a mean of independent samples (`sigma^2 / N`). Old evidence
//! fades with the time constant `memory_s` (a fading-memory filter: the
//! Kalman filter for parameters that random-walk with a process noise
//! proportional to the current covariance; for a truly constant flow the
//! reported variance is then conservative, by up to a factor
//! `1 + alpha`, about two, at steady state), and is discounted further
//! when the head turns by more than `turn_rad` from where the evidence was
//! gathered (biases and model error are fixed in the probe frame) or when
//! new frames stop fitting the estimate (the flow changed: the smoothed
//! chi-square per degree of freedom of new frames against the estimate
//! exceeds `change_ratio`). Each discount grows the covariance.
//!
//! Near zero flow the first-order sigmas mean little (the eigenvalues of
//! a noise matrix are close together and the largest is biased up), so a
//! flow counts as resolved only when the estimate of `M` also passes a
//! chi-square test against no flow at all (five degrees of freedom, false
//! alarm probability [`FlowWindowConfig::false_alarm_probability`]).
//!
//! # Cost and memory
//! One frame: one pass over the ports building five-element rows, a rank
//! update of a 5x5 matrix per port, a 5x5 Cholesky factorisation and
//! inverse, and a 3x3 symmetric eigen-decomposition (iteration cap
//! [`EIGEN_MAX_ITERATIONS`]). The state is a few hundred bytes, fixed.

use nalgebra::{Matrix3, SMatrix, SVector, Vector3};

use crate::frame::HeadPose;
use crate::map::{add, dot, finite3, head_forward_map, probe_to_map, scale, sub, unit};
use crate::probe::ProbeLayout;
use crate::probe::chi2::chi_square_quantile_upper;

/// Parameters: the five trace-free entries of `M`
/// (`M11, M22, M12, M13, M23`; `M33 = -M11 - M22`).
const NPAR: usize = 5;
type Info = SMatrix<f64, NPAR, NPAR>;
type Par = SVector<f64, NPAR>;

/// Iteration cap of the 3x3 symmetric eigen-decomposition.
pub const EIGEN_MAX_ITERATIONS: usize = 64;

/// Log-likelihood ratio of the two senses beyond which the head's motion
/// decides the sense (a likelihood ratio of 1000).
pub const SENSE_LOG_RATIO: f64 = 6.907_755_278_982_137;

/// Direction variance cap, rad^2 (an uninformative direction).
const DIR_VAR_CAP: f64 = 1.0;

/// Effective frames before the change test runs (the estimate must exist
/// before frames can disagree with it).
const CHANGE_TEST_MIN_FRAMES: f64 = 20.0;

/// Prior sigma on each entry of `M`, m^2/s^2: keeps the normal equations
/// solvable before the data determine every entry (a 5-port head at one
/// attitude does not), with no pull on any real flow (100 m/s squared).
const M_PRIOR_SIGMA: f64 = 1e4;

/// How the windowed estimate is tuned.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FlowWindowConfig {
    /// Time constant of the evidence's fading, s (> 0; infinite keeps all).
    pub memory_s: f64,
    /// A head turn beyond this from where the evidence was gathered
    /// discounts it, rad (> 0).
    pub turn_rad: f64,
    /// Fraction of the evidence kept at such a turn, (0, 1].
    pub turn_keep: f64,
    /// Smoothed chi-square per degree of freedom of new frames against the
    /// estimate beyond which the flow is taken to have changed (> 1).
    pub change_ratio: f64,
    /// Fraction of the evidence kept when the flow changed, (0, 1].
    pub change_keep: f64,
    /// Smoothing time of the change statistic, s (> 0).
    pub change_smoothing_s: f64,
    /// The estimate is resolved when its direction sigma is below this,
    /// rad (> 0) ...
    pub resolve_sigma_rad: f64,
    /// ... its dynamic pressure exceeds this many sigma (> 0) ...
    pub resolve_z: f64,
    /// ... and the chi-square test against no flow fails at this false
    /// alarm probability, (0, 1).
    pub false_alarm_probability: f64,
    /// A flow whose dynamic pressure is bounded (estimate plus `resolve_z`
    /// sigma) below this is no usable flow, Pa (>= 0).
    pub still_q_pa: f64,
    /// Integrating longer than this without resolving ends the dwell
    /// ([`WindowStatus::DwellExpired`]), s (> 0).
    pub max_dwell_s: f64,
    /// Pose gaps longer than this restart the head-velocity estimate, s.
    pub max_pose_gap_s: f64,
    /// 1-sigma zero offset of each port's transducer, not calibrated out,
    /// Pa (>= 0; 0: none). An offset is fixed while the noise is not, so it
    /// does not average down: at a fixed head attitude the estimate's
    /// covariance is `(1 + N s_b^2 / s^2)` times the noise-only one (N the
    /// effective frames, `s` the port noise), the variance of a mean of N
    /// frames that share one draw of the offsets.
    pub port_zero_sigma_pa: f64,
}

impl Default for FlowWindowConfig {
    /// Defaults for a slow crawler at 100 Hz (common practice, not from a
    /// published source): 8 s memory, half the evidence kept after a
    /// 0.5 rad turn, a quarter after a change in the flow (chi-square per
    /// degree of freedom above 3 over 0.5 s), resolved at 0.3 rad, three
    /// sigma and a one-in-a-million false alarm, no usable flow below
    /// 0.01 Pa (0.13 m/s in air), a dwell of at most 20 s.
    fn default() -> Self {
        Self {
            memory_s: 8.0,
            turn_rad: 0.5,
            turn_keep: 0.5,
            change_ratio: 3.0,
            change_keep: 0.25,
            change_smoothing_s: 0.5,
            resolve_sigma_rad: 0.3,
            resolve_z: 3.0,
            false_alarm_probability: 1e-6,
            still_q_pa: 0.01,
            max_dwell_s: 20.0,
            max_pose_gap_s: 0.2,
            port_zero_sigma_pa: 0.0,
        }
    }
}

/// What the window refused.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum FlowWindowError {
    /// A configuration field out of range.
    Config {
        /// Field name.
        field: &'static str,
        /// Value given.
        value: f64,
    },
    /// A frame time not finite or not after the last one.
    TimeOrder {
        /// Time given, s.
        time_s: f64,
        /// Last time used, s.
        last_s: f64,
    },
    /// The pose is not finite or its quaternion is degenerate.
    Pose,
    /// The gas density is not finite and positive, kg/m^3.
    Density {
        /// Value given.
        value: f64,
    },
}

impl FlowWindowConfig {
    /// Check every field.
    ///
    /// # Errors
    /// [`FlowWindowError::Config`] naming the first bad field.
    pub fn validate(&self) -> Result<(), FlowWindowError> {
        let bad = |field: &'static str, value: f64| Err(FlowWindowError::Config { field, value });
        let pos = |v: f64| v.is_finite() && v > 0.0;
        let frac = |v: f64| v.is_finite() && v > 0.0 && v <= 1.0;
        if self.memory_s.is_nan() || self.memory_s <= 0.0 {
            return bad("memory_s", self.memory_s);
        }
        if !pos(self.turn_rad) {
            return bad("turn_rad", self.turn_rad);
        }
        if !frac(self.turn_keep) {
            return bad("turn_keep", self.turn_keep);
        }
        if !(self.change_ratio.is_finite() && self.change_ratio > 1.0) {
            return bad("change_ratio", self.change_ratio);
        }
        if !frac(self.change_keep) {
            return bad("change_keep", self.change_keep);
        }
        if !pos(self.change_smoothing_s) {
            return bad("change_smoothing_s", self.change_smoothing_s);
        }
        if !pos(self.resolve_sigma_rad) {
            return bad("resolve_sigma_rad", self.resolve_sigma_rad);
        }
        if !pos(self.resolve_z) {
            return bad("resolve_z", self.resolve_z);
        }
        let p = self.false_alarm_probability;
        if !(p.is_finite() && p > 0.0 && p < 1.0) {
            return bad("false_alarm_probability", p);
        }
        if !(self.still_q_pa.is_finite() && self.still_q_pa >= 0.0) {
            return bad("still_q_pa", self.still_q_pa);
        }
        if !pos(self.max_dwell_s) {
            return bad("max_dwell_s", self.max_dwell_s);
        }
        if !pos(self.max_pose_gap_s) {
            return bad("max_pose_gap_s", self.max_pose_gap_s);
        }
        if !(self.port_zero_sigma_pa.is_finite() && self.port_zero_sigma_pa >= 0.0) {
            return bad("port_zero_sigma_pa", self.port_zero_sigma_pa);
        }
        Ok(())
    }
}

/// What the evidence says.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub enum WindowStatus {
    /// No frame yet.
    Empty,
    /// Too little evidence yet: slow down, dwell, integrate.
    Integrating,
    /// Direction and dynamic pressure resolved.
    Resolved,
    /// The evidence bounds the flow below [`FlowWindowConfig::still_q_pa`]:
    /// no flow worth following here (still air).
    NoUsableFlow,
    /// Integrating for [`FlowWindowConfig::max_dwell_s`] did not resolve
    /// the flow, nor bound it below the floor: dwelling longer is not
    /// paying (the window keeps integrating).
    DwellExpired,
}

/// The windowed estimate.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct WindowEstimate {
    /// What the evidence says.
    pub status: WindowStatus,
    /// Gas velocity direction (where the gas moves), unit, map frame;
    /// `None` until an axis is found.
    pub velocity_dir_map: Option<[f64; 3]>,
    /// Its covariance, map frame, rad^2 (small-angle, first order).
    pub dir_cov_map: [[f64; 3]; 3],
    /// Gas dynamic pressure `rho |w|^2 / 2` (the head's motion removed),
    /// Pa.
    pub dynamic_pressure_pa: f64,
    /// Its 1-sigma, Pa.
    pub dynamic_pressure_sigma_pa: f64,
    /// Chi-square of the estimate of `M` against no flow (5 degrees of
    /// freedom).
    pub flow_chi_square: f64,
    /// Density used, kg/m^3 (the last frame's).
    pub density_kg_per_m3: f64,
    /// Effective number of frames behind the estimate (after fading and
    /// discounts).
    pub effective_frames: f64,
    /// Log-likelihood ratio of the sense reported against its reverse,
    /// from the head's motion.
    pub sense_log_ratio: f64,
    /// The sense along the axis came from the head's motion (else from
    /// continuity or the windward convention).
    pub sense_from_motion: bool,
    /// Discounts so far (head turns and flow changes).
    pub discounts: u32,
}

impl WindowEstimate {
    /// Nothing yet.
    pub const EMPTY: Self = Self {
        status: WindowStatus::Empty,
        velocity_dir_map: None,
        dir_cov_map: [[0.0; 3]; 3],
        dynamic_pressure_pa: 0.0,
        dynamic_pressure_sigma_pa: 0.0,
        flow_chi_square: 0.0,
        density_kg_per_m3: 0.0,
        effective_frames: 0.0,
        sense_log_ratio: 0.0,
        sense_from_motion: false,
        discounts: 0,
    };

    /// Direction 1-sigma (square root of the covariance trace), rad.
    #[must_use]
    pub fn dir_sigma_rad(&self) -> f64 {
        let tr: f64 = self
            .dir_cov_map
            .iter()
            .enumerate()
            .filter_map(|(i, r)| r.get(i))
            .sum();
        libm::sqrt(libm::fabs(tr))
    }

    /// The gas velocity, map frame, m/s, from the direction, the dynamic
    /// pressure and the density.
    #[must_use]
    pub fn velocity_map_m_per_s(&self) -> Option<[f64; 3]> {
        let d = self.velocity_dir_map?;
        let rho = self.density_kg_per_m3;
        let q = self.dynamic_pressure_pa;
        (rho > 0.0 && q >= 0.0).then(|| scale(d, libm::sqrt(2.0 * q / rho)))
    }
}

/// The windowed estimator for a probe of `P` ports. See the module doc.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FlowWindow<const P: usize> {
    cfg: FlowWindowConfig,
    chi2_threshold: f64,
    info: Info,
    rhs: Par,
    theta: Option<Par>,
    frames: f64,
    sense_llr: f64,
    last_time_s: f64,
    last_position_m: Option<[f64; 3]>,
    head_velocity: [f64; 3],
    reference_forward: Option<[f64; 3]>,
    change_stat: f64,
    unresolved_since_s: Option<f64>,
    /// Zero-offset variance over noise variance (mean port weight), of
    /// the last frame with evidence.
    zero_ratio: f64,
    est: WindowEstimate,
}

impl<const P: usize> FlowWindow<P> {
    /// An empty window.
    ///
    /// # Errors
    /// [`FlowWindowError::Config`] for a bad setting.
    pub fn new(cfg: FlowWindowConfig) -> Result<Self, FlowWindowError> {
        cfg.validate()?;
        let chi2_threshold =
            chi_square_quantile_upper(5, cfg.false_alarm_probability).map_err(|_| {
                FlowWindowError::Config {
                    field: "false_alarm_probability",
                    value: cfg.false_alarm_probability,
                }
            })?;
        Ok(Self {
            cfg,
            chi2_threshold,
            info: Info::zeros(),
            rhs: Par::zeros(),
            theta: None,
            frames: 0.0,
            sense_llr: 0.0,
            last_time_s: f64::NEG_INFINITY,
            last_position_m: None,
            head_velocity: [0.0; 3],
            reference_forward: None,
            change_stat: 1.0,
            unresolved_since_s: None,
            zero_ratio: 0.0,
            est: WindowEstimate::EMPTY,
        })
    }

    /// The configuration.
    #[must_use]
    pub const fn config(&self) -> &FlowWindowConfig {
        &self.cfg
    }

    /// The current estimate.
    #[must_use]
    pub const fn estimate(&self) -> &WindowEstimate {
        &self.est
    }

    /// The head velocity the window uses (pose differences, smoothed over
    /// about five frames), map frame, m/s.
    #[must_use]
    pub const fn head_velocity_m_per_s(&self) -> [f64; 3] {
        self.head_velocity
    }

    fn discount(&mut self, keep: f64) {
        self.info *= keep;
        self.rhs *= keep;
        self.frames *= keep;
        self.sense_llr *= keep;
        self.est.discounts = self.est.discounts.saturating_add(1);
    }

    /// Fold one frame in: port readings `pressures_pa` (absolute, with the
    /// layout's biases), the layout they came from, the head pose, the gas
    /// density, and a mask of ports to leave out (bit k: port k). Ports
    /// with non-finite readings are left out too. A frame with fewer than
    /// two usable ports adds no evidence (but still ages it).
    ///
    /// # Errors
    /// [`FlowWindowError::TimeOrder`] for a time not after the last one,
    /// [`FlowWindowError::Pose`], [`FlowWindowError::Density`]; the window
    /// is unchanged.
    pub fn add(
        &mut self,
        time_s: f64,
        pressures_pa: &[f64; P],
        layout: &ProbeLayout<P>,
        pose: &HeadPose,
        density_kg_per_m3: f64,
        excluded: u32,
    ) -> Result<&WindowEstimate, FlowWindowError> {
        if !time_s.is_finite() || time_s <= self.last_time_s {
            return Err(FlowWindowError::TimeOrder {
                time_s,
                last_s: self.last_time_s,
            });
        }
        let rho = density_kg_per_m3;
        if !(rho.is_finite() && rho > 0.0) {
            return Err(FlowWindowError::Density { value: rho });
        }
        let (Some(forward), true) = (head_forward_map(pose), finite3(pose.position_m)) else {
            return Err(FlowWindowError::Pose);
        };
        let dt = if self.last_time_s.is_finite() {
            time_s - self.last_time_s
        } else {
            0.0
        };
        // Head velocity from pose differences.
        let pos = pose.position_m;
        match self.last_position_m {
            Some(p0) if dt > 0.0 && dt <= self.cfg.max_pose_gap_s => {
                let v = scale(sub(pos, p0), 1.0 / dt);
                if finite3(v) {
                    self.head_velocity = add(scale(self.head_velocity, 0.8), scale(v, 0.2));
                }
            }
            _ => self.head_velocity = [0.0; 3],
        }
        self.last_position_m = Some(pos);
        self.last_time_s = time_s;
        // Fading memory.
        if dt > 0.0 {
            let alpha = libm::exp(-dt / self.cfg.memory_s);
            self.info *= alpha;
            self.rhs *= alpha;
            self.frames *= alpha;
            self.sense_llr *= alpha;
        }
        // A turn away from where the evidence was gathered.
        match self.reference_forward {
            Some(r) if dot(r, forward) < libm::cos(self.cfg.turn_rad) => {
                self.discount(self.cfg.turn_keep);
                self.reference_forward = Some(forward);
            }
            Some(_) => {}
            None => self.reference_forward = Some(forward),
        }

        // The current gas velocity estimate, for the cross term and the
        // sense test.
        let w_hat = self.est.velocity_map_m_per_s().unwrap_or([0.0; 3]);
        let vh = self.head_velocity;
        let cq = 1.125 * rho;
        // Per port: the row, the reading less the known and cross terms,
        // the weight, and the two senses' predicted relative-flow terms.
        let mut rows = [(Par::zeros(), 0.0f64, 0.0f64, 0.0f64, 0.0f64); P];
        let (mut sw, mut sx, mut sy) = (0.0f64, Par::zeros(), 0.0f64);
        let (mut sa, mut sb, mut sr) = (0.0f64, 0.0f64, 0.0f64);
        let mut used = 0u32;
        for (k, (slot, (((n, p), b), s))) in rows
            .iter_mut()
            .zip(
                layout
                    .normals()
                    .iter()
                    .zip(pressures_pa.iter())
                    .zip(layout.bias_pa().iter())
                    .zip(layout.sigma_pa().iter()),
            )
            .enumerate()
        {
            let out = u32::try_from(k)
                .ok()
                .and_then(|s| excluded.checked_shr(s))
                .is_some_and(|m| m & 1 == 1);
            if out || !p.is_finite() || !(s.is_finite() && *s > 0.0) {
                continue;
            }
            let Some(nm) = probe_to_map([n.x, n.y, n.z], pose) else {
                continue;
            };
            let [nx, ny, nz] = nm;
            let nv = dot(nm, vh);
            let nw = dot(nm, w_hat);
            let x = Par::from([
                cq * (nx * nx - nz * nz),
                cq * (ny * ny - nz * nz),
                cq * 2.0 * nx * ny,
                cq * 2.0 * nx * nz,
                cq * 2.0 * ny * nz,
            ]);
            let raw = p - b;
            let y = raw - cq * nv * nv + 2.0 * cq * nv * nw;
            // The two senses: relative flow +w - v_h or -w - v_h.
            let fa = cq * (nw - nv) * (nw - nv);
            let fb = cq * (nw + nv) * (nw + nv);
            let w = 1.0 / (s * s);
            *slot = (x, y, w, raw - fa, raw - fb);
            sw += w;
            sx.axpy(w, &x, 1.0);
            sy += w * y;
            sa += w * (raw - fa);
            sb += w * (raw - fb);
            sr += w;
            used += 1;
        }
        if used >= 2 && sw > 0.0 {
            let zs = self.cfg.port_zero_sigma_pa;
            self.zero_ratio = zs * zs * sw / f64::from(used);
            let xm = sx / sw;
            let ym = sy / sw;
            // The sense test: each frame's log-likelihood ratio of the
            // estimate's sense against its reverse (the same axis and
            // speed), each centred on its own frame constant.
            if self.est.velocity_dir_map.is_some() && dot(vh, vh) > 0.0 && sr > 0.0 {
                let (ma, mb) = (sa / sr, sb / sr);
                let mut llr = 0.0;
                for (_, _, w, ra, rb) in rows.iter().filter(|r| r.2 > 0.0) {
                    let (da, db) = (ra - ma, rb - mb);
                    llr += 0.5 * w * (db * db - da * da);
                }
                if llr.is_finite() {
                    self.sense_llr += llr;
                }
            }
            // The change test against the current estimate.
            if let Some(theta) = self.theta
                && self.frames >= CHANGE_TEST_MIN_FRAMES
            {
                let mut chi2 = 0.0;
                for (x, y, w, _, _) in rows.iter().filter(|r| r.2 > 0.0) {
                    let r = (y - ym) - (x - xm).dot(&theta);
                    chi2 += w * r * r;
                }
                let ratio = chi2 / f64::from(used - 1);
                let g = 1.0 - libm::exp(-dt / self.cfg.change_smoothing_s);
                self.change_stat += g * (ratio - self.change_stat);
                if self.change_stat > self.cfg.change_ratio {
                    self.discount(self.cfg.change_keep);
                    self.change_stat = 1.0;
                }
            }
            for (x, y, w, _, _) in rows.iter().filter(|r| r.2 > 0.0) {
                let xc = x - xm;
                self.info.ger(*w, &xc, &xc, 1.0);
                self.rhs.axpy(w * (y - ym), &xc, 1.0);
            }
            self.frames += 1.0;
        }
        self.solve(time_s, forward, rho);
        Ok(&self.est)
    }

    #[allow(clippy::too_many_lines)]
    fn solve(&mut self, time_s: f64, forward: [f64; 3], rho: f64) {
        let previous = self.est.velocity_dir_map;
        let mut est = WindowEstimate {
            discounts: self.est.discounts,
            density_kg_per_m3: rho,
            effective_frames: self.frames,
            ..WindowEstimate::EMPTY
        };
        if self.frames <= 0.0 {
            self.est = est;
            return;
        }
        est.status = WindowStatus::Integrating;
        let prior = 1.0 / (M_PRIOR_SIGMA * M_PRIOR_SIGMA);
        let mut a = self.info;
        for i in 0..NPAR {
            if let Some(v) = a.get_mut((i, i)) {
                *v += prior;
            }
        }
        let Some(chol) = a.cholesky() else {
            self.theta = None;
            self.finish(est, time_s);
            return;
        };
        let theta = chol.solve(&self.rhs);
        // The ports' zero offsets do not average down (see
        // `FlowWindowConfig::port_zero_sigma_pa`).
        let inflate = 1.0 + self.frames * self.zero_ratio;
        let cm = chol.inverse() * inflate;
        self.theta = Some(theta);
        est.flow_chi_square = (theta.transpose() * a * theta).x / inflate;
        let m = |i: usize| theta.get(i).copied().unwrap_or(0.0);
        let mtf = Matrix3::new(m(0), m(2), m(3), m(2), m(1), m(4), m(3), m(4), -m(0) - m(1));
        let Some(eig) = nalgebra::SymmetricEigen::try_new(mtf, 1e-15, EIGEN_MAX_ITERATIONS) else {
            self.finish(est, time_s);
            return;
        };
        // Dominant eigenpair first.
        let mut order = [0usize, 1, 2];
        let lam = |i: usize| eig.eigenvalues.get(i).copied().unwrap_or(f64::NEG_INFINITY);
        order.sort_unstable_by(|&i, &j| lam(j).total_cmp(&lam(i)));
        let [i1, i2, i3] = order;
        let vec = |i: usize| -> Vector3<f64> { eig.eigenvectors.column(i).into_owned() };
        let (l1, e1) = (lam(i1), vec(i1));
        if !(l1.is_finite() && l1 > 0.0) {
            self.finish(est, time_s);
            return;
        }
        // e_a^T dM e_b as a row over the five trace-free entries.
        let coef = |a: &Vector3<f64>, b: &Vector3<f64>| {
            SVector::<f64, 5>::from([
                a.x * b.x - a.z * b.z,
                a.y * b.y - a.z * b.z,
                a.x * b.y + a.y * b.x,
                a.x * b.z + a.z * b.x,
                a.y * b.z + a.z * b.y,
            ])
        };
        let c1 = coef(&e1, &e1);
        let var_l1 = (c1.transpose() * cm * c1).x.max(0.0);
        est.dynamic_pressure_pa = 0.75 * rho * l1;
        est.dynamic_pressure_sigma_pa = 0.75 * rho * libm::sqrt(var_l1);
        // Direction covariance in the plane of the two other eigenvectors.
        let others = [(lam(i2), vec(i2)), (lam(i3), vec(i3))];
        let mut g = [SVector::<f64, 5>::zeros(); 2];
        let mut ok = [false; 2];
        for ((gk, okk), (lk, ek)) in g.iter_mut().zip(ok.iter_mut()).zip(others.iter()) {
            let gap = l1 - lk;
            if gap > 0.0 && gap.is_finite() {
                *gk = coef(ek, &e1) / gap;
                *okk = true;
            }
        }
        let mut dcov = Matrix3::zeros();
        for (ia, (a, (ga, oka))) in others.iter().zip(g.iter().zip(ok.iter())).enumerate() {
            for (ib, (b, (gb, okb))) in others.iter().zip(g.iter().zip(ok.iter())).enumerate() {
                let c = if *oka && *okb {
                    (ga.transpose() * cm * gb).x
                } else if ia == ib {
                    DIR_VAR_CAP
                } else {
                    0.0
                };
                dcov += a.1 * b.1.transpose() * c;
            }
        }
        // Cap at an uninformative direction.
        let tr = dcov.trace();
        if !tr.is_finite() || tr > 2.0 * DIR_VAR_CAP {
            dcov = if tr.is_finite() && tr > 0.0 {
                dcov * (2.0 * DIR_VAR_CAP / tr)
            } else {
                (Matrix3::identity() - e1 * e1.transpose()) * DIR_VAR_CAP
            };
        }
        est.dir_cov_map = crate::decide::mat3_to_arr(&dcov);
        // The sense along the axis: the last estimate's (the sense test
        // ran against it), else windward.
        let axis = [e1.x, e1.y, e1.z];
        // An axis more than 60 degrees from the last is a new flow: the
        // old sense and its evidence say nothing about it.
        let previous = previous.filter(|d| libm::fabs(dot(*d, axis)) >= 0.5);
        let mut sign = match previous {
            Some(d) if dot(d, axis) != 0.0 => {
                if dot(d, axis) > 0.0 {
                    1.0
                } else {
                    -1.0
                }
            }
            // Windward: the flow arrives at the face the probe points at.
            _ => {
                if dot(axis, forward) > 0.0 {
                    -1.0
                } else {
                    1.0
                }
            }
        };
        if previous.is_none() {
            self.sense_llr = 0.0;
        }
        if self.sense_llr < -SENSE_LOG_RATIO {
            // The reverse is a thousand times likelier.
            sign = -sign;
            self.sense_llr = -self.sense_llr;
        }
        est.sense_log_ratio = self.sense_llr;
        est.sense_from_motion = self.sense_llr > SENSE_LOG_RATIO;
        est.velocity_dir_map = unit(scale(axis, sign));
        let resolved = est.velocity_dir_map.is_some()
            && est.flow_chi_square > self.chi2_threshold
            && est.dir_sigma_rad() <= self.cfg.resolve_sigma_rad
            && est.dynamic_pressure_pa >= self.cfg.resolve_z * est.dynamic_pressure_sigma_pa;
        if resolved {
            est.status = WindowStatus::Resolved;
        }
        self.finish(est, time_s);
    }

    /// Status bookkeeping common to every exit of [`Self::solve`].
    fn finish(&mut self, mut est: WindowEstimate, time_s: f64) {
        if est.status == WindowStatus::Resolved {
            self.unresolved_since_s = None;
        } else if est.status == WindowStatus::Integrating {
            let since = *self.unresolved_since_s.get_or_insert(time_s);
            let bounded = est.dynamic_pressure_sigma_pa > 0.0
                && est.dynamic_pressure_pa + self.cfg.resolve_z * est.dynamic_pressure_sigma_pa
                    < self.cfg.still_q_pa;
            if bounded {
                est.status = WindowStatus::NoUsableFlow;
            } else if time_s - since >= self.cfg.max_dwell_s {
                est.status = WindowStatus::DwellExpired;
            }
        }
        self.est = est;
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::gas::IdealGas;
    use crate::probe::{Direction, ProbeSolver, SolverConfig};
    use rand_chacha::ChaCha8Rng;
    use rand_core::{RngCore, SeedableRng};

    const RHO: f64 = 1.2;
    const P_STATIC: f64 = 101_325.0;

    fn deg(d: f64) -> f64 {
        d.to_radians()
    }

    fn seven(sigma: f64) -> ProbeLayout<7> {
        ProbeLayout::seven_port(deg(40.0), sigma).unwrap()
    }

    fn normal(rng: &mut ChaCha8Rng) -> f64 {
        let u = |r: &mut ChaCha8Rng| f64::from(r.next_u32()) / 4_294_967_296.0;
        let u1 = 1.0 - u(rng);
        let u2 = u(rng);
        libm::sqrt(-2.0 * libm::log(u1)) * libm::cos(2.0 * core::f64::consts::PI * u2)
    }

    /// Head at `pos` turned `yaw` about +z.
    fn pose(pos: [f64; 3], yaw: f64) -> HeadPose {
        HeadPose {
            position_m: pos,
            orientation_wxyz: [libm::cos(0.5 * yaw), 0.0, 0.0, libm::sin(0.5 * yaw)],
            position_sigma_m: 0.0,
            attitude_sigma_rad: 0.0,
        }
    }

    /// Port readings by the sphere potential-flow law (Anderson,
    /// Fundamentals of Aerodynamics, flow over a sphere: Cp = 1 - 9/4
    /// sin^2 theta), for the gas velocity `w` seen from a head moving at
    /// `vh`, plus Gaussian noise of `sigma` per port.
    fn ports(
        layout: &ProbeLayout<7>,
        pose: &HeadPose,
        w: [f64; 3],
        vh: [f64; 3],
        sigma: f64,
        rng: &mut ChaCha8Rng,
    ) -> [f64; 7] {
        let rel = sub(w, vh);
        let speed = libm::sqrt(dot(rel, rel));
        let q = 0.5 * RHO * speed * speed;
        let mut out = [P_STATIC; 7];
        for (o, n) in out.iter_mut().zip(layout.normals()) {
            let nm = probe_to_map([n.x, n.y, n.z], pose).unwrap();
            let c = if speed > 0.0 {
                -dot(nm, rel) / speed
            } else {
                0.0
            };
            *o = P_STATIC + q * (1.0 - 2.25 * (1.0 - c * c)) + sigma * normal(rng);
        }
        out
    }

    fn angle(a: [f64; 3], b: [f64; 3]) -> f64 {
        let c = dot(a, b) / libm::sqrt(dot(a, a) * dot(b, b));
        libm::acos(c.clamp(-1.0, 1.0))
    }

    fn no_forgetting() -> FlowWindowConfig {
        FlowWindowConfig {
            memory_s: f64::INFINITY,
            ..FlowWindowConfig::default()
        }
    }

    /// Speed giving dynamic pressure `q` in the test gas.
    fn speed_for(q: f64) -> f64 {
        libm::sqrt(2.0 * q / RHO)
    }

    #[test]
    fn exact_pressures_give_the_flow_and_agree_with_the_single_frame_solver() {
        let layout = seven(1.0);
        let solver = ProbeSolver::new(layout, IdealGas::DRY_AIR, SolverConfig::default()).unwrap();
        let mut rng = ChaCha8Rng::seed_from_u64(1);
        // Gas moving toward -x (the head points +x, into the flow), 20 deg off.
        let v = speed_for(50.0);
        let w = [-v * libm::cos(deg(20.0)), -v * libm::sin(deg(20.0)), 0.0];
        let p = pose([0.0; 3], 0.0);
        let y = ports(&layout, &p, w, [0.0; 3], 0.0, &mut rng);
        let mut win = FlowWindow::<7>::new(no_forgetting()).unwrap();
        let e = *win.add(0.0, &y, &layout, &p, RHO, 0).unwrap();
        let sol = solver.solve(&y, None).unwrap();
        let Direction::Valid { velocity_unit, .. } = sol.direction else {
            panic!("ML solution withheld at q = 50 Pa");
        };
        let d = e.velocity_dir_map.unwrap();
        let ml = [velocity_unit.x, velocity_unit.y, velocity_unit.z];
        assert!(angle(d, ml) < 1e-7, "{d:?} vs ML {ml:?}");
        assert!(angle(d, w) < 1e-7);
        assert!((e.dynamic_pressure_pa - sol.dynamic_pressure_pa).abs() < 1e-6 * 50.0);
        assert!((e.dynamic_pressure_pa - 50.0).abs() < 1e-6 * 50.0);
        assert_eq!(e.status, WindowStatus::Resolved);
    }

    #[test]
    fn one_noisy_frame_at_high_q_matches_the_ml_solution_within_its_sigma() {
        // The relaxed linear model has more unknowns than the ML fit, so
        // its sigma cannot be smaller than the ML (Cramer-Rao) sigma; the
        // two estimates of the same frame agree to within the window's.
        let layout = seven(0.5);
        let solver = ProbeSolver::new(layout, IdealGas::DRY_AIR, SolverConfig::default()).unwrap();
        let mut rng = ChaCha8Rng::seed_from_u64(2);
        let v = speed_for(80.0);
        let p = pose([0.0; 3], 0.0);
        let mut far = 0;
        for k in 0..200 {
            let a = deg(f64::from(k % 40));
            let w = [-v * libm::cos(a), 0.0, -v * libm::sin(a)];
            let y = ports(&layout, &p, w, [0.0; 3], 0.5, &mut rng);
            let mut win = FlowWindow::<7>::new(no_forgetting()).unwrap();
            let e = *win.add(0.0, &y, &layout, &p, RHO, 0).unwrap();
            let sol = solver.solve(&y, None).unwrap();
            let Direction::Valid { velocity_unit, .. } = sol.direction else {
                panic!("withheld");
            };
            let ml = [velocity_unit.x, velocity_unit.y, velocity_unit.z];
            assert!(e.dir_sigma_rad() >= 0.99 * sol.sigma.angle_rad);
            assert!(e.dynamic_pressure_sigma_pa >= 0.99 * sol.sigma.dynamic_pressure_pa);
            let dq = (e.dynamic_pressure_pa - sol.dynamic_pressure_pa).abs();
            if angle(e.velocity_dir_map.unwrap(), ml) > 3.0 * e.dir_sigma_rad()
                || dq > 3.0 * e.dynamic_pressure_sigma_pa
            {
                far += 1;
            }
        }
        assert!(far <= 6, "{far} of 200 beyond 3 sigma of the ML solution");
    }

    #[test]
    fn dynamic_pressure_variance_is_that_of_a_mean_of_n_frames() {
        // Textbook statistics: the mean of N independent samples of
        // variance s^2 has variance s^2 / N. A stationary head, no
        // forgetting: the window's q after N frames against the spread over
        // many seeded trials, and against its one-frame sigma over N.
        let sigma = 0.5;
        let layout = seven(sigma);
        let v = speed_for(20.0);
        let w = [-v * libm::cos(deg(15.0)), 0.0, -v * libm::sin(deg(15.0))];
        let p = pose([0.0; 3], 0.0);
        let n = 25;
        let trials = 400;
        let mut rng = ChaCha8Rng::seed_from_u64(3);
        let (mut sum, mut sum2) = (0.0, 0.0);
        // One frame's sigma, linearised at the truth (a noise-free frame).
        let one_frame = {
            let mut win = FlowWindow::<7>::new(no_forgetting()).unwrap();
            let y = ports(&layout, &p, w, [0.0; 3], 0.0, &mut rng);
            win.add(0.0, &y, &layout, &p, RHO, 0)
                .unwrap()
                .dynamic_pressure_sigma_pa
        };
        let (mut dsum2, mut reported_q, mut reported_d) = (0.0, 0.0, 0.0);
        let mut reported_var_sum = 0.0;
        for _ in 0..trials {
            let mut win = FlowWindow::<7>::new(no_forgetting()).unwrap();
            for i in 0..n {
                let y = ports(&layout, &p, w, [0.0; 3], sigma, &mut rng);
                win.add(f64::from(i) * 0.01, &y, &layout, &p, RHO, 0)
                    .unwrap();
            }
            let e = win.estimate();
            sum += e.dynamic_pressure_pa;
            sum2 += e.dynamic_pressure_pa * e.dynamic_pressure_pa;
            let a = angle(e.velocity_dir_map.unwrap(), w);
            dsum2 += a * a;
            reported_q = e.dynamic_pressure_sigma_pa;
            reported_d = e.dir_sigma_rad();
            reported_var_sum += reported_q * reported_q;
        }
        let t = f64::from(trials);
        let mean = sum / t;
        let var = sum2 / t - mean * mean;
        let nf = f64::from(n);
        // Reported: one frame's variance over N (same geometry every frame).
        let ratio = reported_var_sum / t * nf / (one_frame * one_frame);
        assert!(
            (ratio - 1.0).abs() < 0.02,
            "reported var * N / one-frame var = {ratio}"
        );
        // Empirical: within the sampling spread of a variance from 400
        // trials (relative sd sqrt(2/399) = 7 %; 25 % is over 3 sd).
        let emp = var / (reported_q * reported_q);
        assert!(
            (emp - 1.0).abs() < 0.25,
            "empirical / reported q variance = {emp}"
        );
        assert!((mean - 20.0).abs() < 4.0 * reported_q);
        let emp_d = dsum2 / t / (reported_d * reported_d);
        assert!(
            (emp_d - 1.0).abs() < 0.25,
            "empirical / reported direction variance = {emp_d}"
        );
    }

    #[test]
    fn weak_air_the_single_frame_solver_withholds_is_resolved_in_seconds() {
        // 0.3 m/s air (q = 0.054 Pa) with 0.03 Pa port noise.
        let sigma = 0.03;
        let layout = seven(sigma);
        let solver = ProbeSolver::new(layout, IdealGas::DRY_AIR, SolverConfig::default()).unwrap();
        let w = [
            -0.3 * libm::cos(deg(10.0)),
            -0.3 * libm::sin(deg(10.0)),
            0.0,
        ];
        let p = pose([0.0; 3], 0.0);
        let mut rng = ChaCha8Rng::seed_from_u64(4);
        let mut win = FlowWindow::<7>::new(FlowWindowConfig::default()).unwrap();
        let mut withheld = 0;
        let mut resolved_at = None;
        for i in 0..1000 {
            let t = f64::from(i) * 0.01;
            let y = ports(&layout, &p, w, [0.0; 3], sigma, &mut rng);
            if !matches!(
                solver.solve(&y, None).map(|s| s.direction),
                Ok(Direction::Valid { .. })
            ) {
                withheld += 1;
            }
            let e = *win.add(t, &y, &layout, &p, RHO, 0).unwrap();
            if e.status == WindowStatus::Resolved && resolved_at.is_none() {
                resolved_at = Some(t);
            }
        }
        assert!(
            withheld > 900,
            "the single frame resolved {} of 1000",
            1000 - withheld
        );
        let t = resolved_at.expect("never resolved");
        assert!(t < 5.0, "resolved only at {t} s");
        let e = win.estimate();
        assert_eq!(e.status, WindowStatus::Resolved);
        let err = angle(e.velocity_dir_map.unwrap(), w);
        assert!(
            err < 3.0 * e.dir_sigma_rad(),
            "{err} rad, sigma {}",
            e.dir_sigma_rad()
        );
        assert!((e.dynamic_pressure_pa - 0.054).abs() < 3.0 * e.dynamic_pressure_sigma_pa + 0.005);
    }

    /// Ports with fixed zero offsets (a third of the noise, drawn once per
    /// probe) at a fixed attitude: with the offsets' sigma configured the
    /// reported direction sigma is honest (errors beyond 3 sigma about as
    /// rare as for a normal variable); left out, the sigma shrinks with
    /// the frames while the offsets' error does not, and most probes
    /// report errors far beyond it. Variance of a mean of correlated
    /// samples: textbook statistics.
    #[test]
    fn port_zero_offsets_are_carried_in_the_covariance() {
        let sigma = 0.03;
        let zero_sigma = sigma / 3.0;
        let layout = seven(sigma);
        let p = pose([0.0; 3], 0.0);
        let w = [
            -0.5 * libm::cos(deg(15.0)),
            -0.5 * libm::sin(deg(15.0)),
            0.0,
        ];
        let beyond = |configured: f64| {
            let mut n = 0;
            for seed in 0..20 {
                let mut rng = ChaCha8Rng::seed_from_u64(200 + seed);
                let offsets: [f64; 7] = core::array::from_fn(|_| zero_sigma * normal(&mut rng));
                let cfg = FlowWindowConfig {
                    port_zero_sigma_pa: configured,
                    ..FlowWindowConfig::default()
                };
                let mut win = FlowWindow::<7>::new(cfg).unwrap();
                for i in 0..1500 {
                    let mut y = ports(&layout, &p, w, [0.0; 3], sigma, &mut rng);
                    for (v, b) in y.iter_mut().zip(offsets) {
                        *v += b;
                    }
                    win.add(f64::from(i) * 0.01, &y, &layout, &p, RHO, 0)
                        .unwrap();
                }
                let e = win.estimate();
                let err = angle(e.velocity_dir_map.unwrap(), w);
                if err > 3.0 * e.dir_sigma_rad() {
                    n += 1;
                }
            }
            n
        };
        let honest = beyond(zero_sigma);
        let blind = beyond(0.0);
        assert!(
            honest <= 2,
            "{honest} of 20 beyond 3 sigma with the offsets carried"
        );
        assert!(blind >= 8, "only {blind} of 20 beyond 3 sigma without them");
    }

    #[test]
    fn still_air_is_no_usable_flow_and_never_resolved() {
        let sigma = 0.03;
        let layout = seven(sigma);
        let p = pose([0.0; 3], 0.0);
        for seed in 0..5 {
            let mut rng = ChaCha8Rng::seed_from_u64(10 + seed);
            let mut win = FlowWindow::<7>::new(FlowWindowConfig::default()).unwrap();
            let mut last = WindowStatus::Empty;
            for i in 0..2000 {
                let y = ports(&layout, &p, [0.0; 3], [0.0; 3], sigma, &mut rng);
                last = win
                    .add(f64::from(i) * 0.01, &y, &layout, &p, RHO, 0)
                    .unwrap()
                    .status;
                assert_ne!(last, WindowStatus::Resolved, "seed {seed} step {i}");
            }
            assert_eq!(last, WindowStatus::NoUsableFlow);
        }
    }

    #[test]
    fn covariance_grows_when_the_head_turns_and_when_the_flow_changes() {
        let sigma = 0.03;
        let layout = seven(sigma);
        let mut rng = ChaCha8Rng::seed_from_u64(5);
        let w = [-0.4, 0.0, 0.0];
        let mut win = FlowWindow::<7>::new(FlowWindowConfig::default()).unwrap();
        let p0 = pose([0.0; 3], 0.0);
        for i in 0..300 {
            let y = ports(&layout, &p0, w, [0.0; 3], sigma, &mut rng);
            win.add(f64::from(i) * 0.01, &y, &layout, &p0, RHO, 0)
                .unwrap();
        }
        let before = *win.estimate();
        // Turn the head by 0.6 rad in one step.
        let p1 = pose([0.0; 3], 0.6);
        let y = ports(&layout, &p1, w, [0.0; 3], sigma, &mut rng);
        let after = *win.add(3.0, &y, &layout, &p1, RHO, 0).unwrap();
        assert_eq!(after.discounts, before.discounts + 1);
        assert!(after.dynamic_pressure_sigma_pa > 1.2 * before.dynamic_pressure_sigma_pa);
        assert!(after.dir_sigma_rad() > 1.2 * before.dir_sigma_rad());
        // Settle, then the flow swings by 90 degrees.
        for i in 1..300 {
            let y = ports(&layout, &p1, w, [0.0; 3], sigma, &mut rng);
            win.add(3.0 + f64::from(i) * 0.01, &y, &layout, &p1, RHO, 0)
                .unwrap();
        }
        let settled = *win.estimate();
        let w2 = [0.0, -0.4, 0.0];
        let mut grew = false;
        for i in 0..100 {
            let y = ports(&layout, &p1, w2, [0.0; 3], sigma, &mut rng);
            let e = *win
                .add(6.0 + f64::from(i) * 0.01, &y, &layout, &p1, RHO, 0)
                .unwrap();
            if e.discounts > settled.discounts {
                grew = e.dynamic_pressure_sigma_pa > settled.dynamic_pressure_sigma_pa;
                break;
            }
        }
        assert!(grew, "no discount (or no growth) within 1 s of the change");
        for i in 100..600 {
            let y = ports(&layout, &p1, w2, [0.0; 3], sigma, &mut rng);
            win.add(6.0 + f64::from(i) * 0.01, &y, &layout, &p1, RHO, 0)
                .unwrap();
        }
        let e = win.estimate();
        let err = angle(e.velocity_dir_map.unwrap(), w2);
        assert!(
            err < 3.0 * e.dir_sigma_rad() + 0.05,
            "{err} rad after the change"
        );
    }

    #[test]
    fn the_heads_motion_gives_the_sense_the_pressures_alone_cannot() {
        // Gas moving +x; the head points +x too, so the flow arrives from
        // behind and the windward convention takes the wrong sense. The
        // head dwells 4 s, then crawls at 0.1 m/s: a flow of 0.4 m/s with
        // it reads 0.3 m/s, the reverse would read 0.5 m/s, so the change
        // in relative flow as the head starts to move tells them apart (at
        // a constant head velocity nothing could: +w with v_h and
        // 2 v_h - w give the same relative flow).
        let sigma = 0.02;
        let layout = seven(sigma);
        let mut rng = ChaCha8Rng::seed_from_u64(6);
        let w = [0.4, 0.0, 0.0];
        let mut win = FlowWindow::<7>::new(FlowWindowConfig::default()).unwrap();
        let mut x = 0.0;
        let mut wrong_at_dwell_end = false;
        for i in 0..1400 {
            let t = f64::from(i) * 0.01;
            let v = if t < 4.0 { 0.0 } else { 0.1 };
            x += v * 0.01;
            let p = pose([x, 0.0, 0.0], 0.0);
            let y = ports(&layout, &p, w, [v, 0.0, 0.0], sigma, &mut rng);
            let e = *win.add(t, &y, &layout, &p, RHO, 0).unwrap();
            if i == 399 {
                wrong_at_dwell_end = angle(e.velocity_dir_map.unwrap(), w) > 3.0;
                assert!(!e.sense_from_motion);
            }
        }
        assert!(
            wrong_at_dwell_end,
            "the windward convention should be wrong here"
        );
        let e = win.estimate();
        assert!(e.sense_from_motion, "log ratio {}", e.sense_log_ratio);
        assert!(
            angle(e.velocity_dir_map.unwrap(), w) < 0.2,
            "{:?}",
            e.velocity_dir_map
        );
        // The gas dynamic pressure, not the head's relative one.
        let q = 0.5 * RHO * 0.16;
        assert!((e.dynamic_pressure_pa - q).abs() < 3.0 * e.dynamic_pressure_sigma_pa + 0.01);
    }

    #[test]
    fn a_rotating_head_keeps_one_map_frame_estimate() {
        // Slow yaw sweep of +-0.3 rad (under the turn threshold): the
        // normals are rotated into the map frame, so the evidence adds up.
        let sigma = 0.03;
        let layout = seven(sigma);
        let mut rng = ChaCha8Rng::seed_from_u64(7);
        let w = [-0.3, 0.1, 0.0];
        let mut win = FlowWindow::<7>::new(FlowWindowConfig::default()).unwrap();
        for i in 0..800 {
            let t = f64::from(i) * 0.01;
            let p = pose([0.0; 3], 0.3 * libm::sin(t));
            let y = ports(&layout, &p, w, [0.0; 3], sigma, &mut rng);
            win.add(t, &y, &layout, &p, RHO, 0).unwrap();
        }
        let e = win.estimate();
        assert_eq!(e.status, WindowStatus::Resolved);
        assert!(angle(e.velocity_dir_map.unwrap(), w) < 3.0 * e.dir_sigma_rad() + 0.02);
    }

    #[test]
    fn bad_input_is_refused_and_changes_nothing() {
        let layout = seven(0.03);
        let mut rng = ChaCha8Rng::seed_from_u64(8);
        let p = pose([0.0; 3], 0.0);
        let mut win = FlowWindow::<7>::new(FlowWindowConfig::default()).unwrap();
        let y = ports(&layout, &p, [-0.3, 0.0, 0.0], [0.0; 3], 0.03, &mut rng);
        win.add(1.0, &y, &layout, &p, RHO, 0).unwrap();
        let before = win;
        assert!(matches!(
            win.add(1.0, &y, &layout, &p, RHO, 0),
            Err(FlowWindowError::TimeOrder { .. })
        ));
        assert!(matches!(
            win.add(2.0, &y, &layout, &p, f64::NAN, 0),
            Err(FlowWindowError::Density { .. })
        ));
        let mut bad = p;
        bad.orientation_wxyz = [0.0; 4];
        assert!(matches!(
            win.add(2.0, &y, &layout, &bad, RHO, 0),
            Err(FlowWindowError::Pose)
        ));
        assert_eq!(win, before);
        // A NaN port is left out, the rest is used.
        let mut y2 = y;
        y2[3] = f64::NAN;
        let e = *win.add(2.0, &y2, &layout, &p, RHO, 0).unwrap();
        assert!(e.effective_frames > before.estimate().effective_frames * 0.8);
        assert!(e.dynamic_pressure_pa.is_finite());
        let c = FlowWindowConfig {
            turn_keep: 0.0,
            ..FlowWindowConfig::default()
        };
        assert_eq!(
            FlowWindow::<7>::new(c).unwrap_err(),
            FlowWindowError::Config {
                field: "turn_keep",
                value: 0.0
            }
        );
    }
}
