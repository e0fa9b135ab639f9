//! Centring on the dynamic-pressure ridge, for conduits wider than the
//! robot can feel across.
//!
//! In a conduit several times wider than the robot the skin touches nothing
//! most of the time, so the tactile cross-section gives no centre. The flow
//! still does: the axial velocity of a developed pipe flow peaks on the
//! axis and falls to zero at the wall (the turbulent 1/7-power profile,
//! `u/U = (1 - r/R)^(1/7)`, Schlichting, *Boundary-Layer Theory*, ch. on
//! turbulent pipe flow; laminar: Hagen–Poiseuille), so the dynamic pressure
//! the probe reads rises toward the centre. [`RidgeSeeker`] estimates the
//! gradient of the fused dynamic pressure across the flow by weighted least
//! squares on the path just travelled, and steers up it.
//!
//! - Model: `q(x) = a + g . (x - x_now)` over a window that forgets
//!   exponentially with distance travelled (not time: a held robot keeps
//!   its estimate). The along-flow part of `g` soaks up the change of `q`
//!   along the conduit; the part across the flow is the centring cue.
//! - Excitation: a small helical heading dither (a cone of half-angle
//!   `dither_rad` about the steered heading, one turn per
//!   `dither_wavelength_m` of travel) keeps the lateral positions spread in
//!   both directions across the flow. Its axes come from the head's own
//!   frame, so a rotated scene gives the rotated command.
//! - Safety: the cue is only a tilt of the heading, capped at
//!   `max_tilt_rad`; wall pushes and the speed limits of the decision stage
//!   act on top of it.
//!
//! Steering up a pressure gradient is extremum seeking with a dither; the
//! profile law is textbook; its use here for centring a crawler is our own
//! design, not a published method. It assumes a profile that peaks inside
//! the conduit (true for straight runs; at bends the peak moves toward the
//! outer wall, and the cue follows it). Turbulent unsteadiness adds noise
//! the window averages over; the simulator has none, so field gains are an
//! open question.

use crate::map::{dot, norm, reject, scale, sub, unit};

/// Settings of the ridge seeker.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RidgeConfig {
    /// Window length: sample weights fall by `e` per this much travel, m.
    pub window_m: f64,
    /// Heading tilt per unit relative gradient: tilt = gain * |g| / q, m.
    pub gain_m: f64,
    /// Largest tilt the cue may ask for, rad.
    pub max_tilt_rad: f64,
    /// Dither cone half-angle, rad (0: no dither).
    pub dither_rad: f64,
    /// Travel per dither turn, m.
    pub dither_wavelength_m: f64,
    /// Lateral spread of the window's positions below which the gradient
    /// is not trusted, m.
    pub min_spread_m: f64,
}

impl RidgeConfig {
    /// Settings scaled to a robot of radius `r` (m).
    #[must_use]
    pub fn for_robot(r: f64) -> Self {
        Self {
            window_m: 40.0 * r,
            gain_m: 3.0 * r,
            max_tilt_rad: 0.2,
            dither_rad: 0.12,
            dither_wavelength_m: 25.0 * r,
            min_spread_m: 0.1 * r,
        }
    }

    /// Whether every field is usable.
    #[must_use]
    pub fn is_valid(&self) -> bool {
        let pos = |v: f64| v.is_finite() && v > 0.0;
        let nonneg = |v: f64| v.is_finite() && v >= 0.0;
        pos(self.window_m)
            && nonneg(self.gain_m)
            && nonneg(self.max_tilt_rad)
            && self.max_tilt_rad < 1.0
            && nonneg(self.dither_rad)
            && self.dither_rad < 0.5
            && pos(self.dither_wavelength_m)
            && nonneg(self.min_spread_m)
    }
}

/// Weighted least-squares state of the dynamic pressure over the recent
/// path, with positions relative to the latest one.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RidgeSeeker {
    sw: f64,
    sw2: f64,
    sqq: f64,
    sx: [f64; 3],
    sxx: [[f64; 3]; 3],
    sq: f64,
    sxq: [f64; 3],
    anchor: Option<[f64; 3]>,
    travelled_m: f64,
    /// Travel since the window restarted, m.
    since_clear_m: f64,
    /// Flow direction the window belongs to.
    reference_dir: Option<[f64; 3]>,
}

/// The centring cue of one step.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RidgeCue {
    /// Tilt toward the ridge (across the flow, map frame), rad as a vector
    /// length; zero when the gradient is not trusted.
    pub tilt: [f64; 3],
    /// Dither tilt (across the flow, map frame).
    pub dither: [f64; 3],
    /// Relative lateral gradient |g| / q, 1/m (`None`: not trusted).
    pub relative_gradient_per_m: Option<f64>,
}

impl RidgeSeeker {
    /// Empty state.
    pub const NEW: Self = Self {
        sw: 0.0,
        sw2: 0.0,
        sqq: 0.0,
        sx: [0.0; 3],
        sxx: [[0.0; 3]; 3],
        sq: 0.0,
        sxq: [0.0; 3],
        anchor: None,
        travelled_m: 0.0,
        since_clear_m: 0.0,
        reference_dir: None,
    };

    /// Flow turning by more than this from the window's reference
    /// direction restarts the window (a bend or a junction: positions from
    /// the leg before would read as lateral in the new one), rad.
    pub const RESTART_TURN_RAD: f64 = 0.25;

    /// Forget the window (the flow turned: a bend or a junction), keeping
    /// the travel that drives the dither phase.
    fn clear(&mut self) {
        let travelled = self.travelled_m;
        *self = Self::NEW;
        self.travelled_m = travelled;
    }

    /// Distance travelled so far, m (drives the dither phase).
    #[must_use]
    pub const fn travelled_m(&self) -> f64 {
        self.travelled_m
    }

    /// Add the dynamic pressure `q_pa` read at `pos` (map frame) in flow
    /// moving along `velocity_dir` (unit, map frame).
    pub fn add(&mut self, pos: [f64; 3], q_pa: f64, velocity_dir: [f64; 3], cfg: &RidgeConfig) {
        if !(q_pa.is_finite() && pos.iter().all(|v| v.is_finite())) {
            return;
        }
        match self.reference_dir {
            Some(r) if dot(r, velocity_dir) >= libm::cos(Self::RESTART_TURN_RAD) => {}
            _ => {
                self.clear();
                self.reference_dir = unit(velocity_dir);
            }
        }
        if let Some(a) = self.anchor {
            let d = sub(pos, a);
            let step = norm(d);
            if step.is_finite() {
                self.travelled_m += step;
                self.since_clear_m += step;
            }
            // Forget by travel, then move the origin to `pos`:
            // x' = x - d for every stored sample.
            let f = libm::exp(-step / cfg.window_m);
            self.sw *= f;
            self.sw2 *= f * f;
            self.sq *= f;
            self.sqq *= f;
            for v in self.sx.iter_mut().chain(self.sxq.iter_mut()) {
                *v *= f;
            }
            for v in self.sxx.iter_mut().flatten() {
                *v *= f;
            }
            let sx = self.sx;
            let (sw, sq) = (self.sw, self.sq);
            for (((row, &sxi), &di), (sxqi, sxi_mut)) in self
                .sxx
                .iter_mut()
                .zip(sx.iter())
                .zip(d.iter())
                .zip(self.sxq.iter_mut().zip(self.sx.iter_mut()))
            {
                for ((v, &sxj), &dj) in row.iter_mut().zip(sx.iter()).zip(d.iter()) {
                    *v += -sxi * dj - di * sxj + sw * di * dj;
                }
                *sxqi -= sq * di;
                *sxi_mut -= sw * di;
            }
        }
        self.anchor = Some(pos);
        // The new sample sits at the origin: it adds to sw and sq only.
        self.sw += 1.0;
        self.sw2 += 1.0;
        self.sq += q_pa;
        self.sqq += q_pa * q_pa;
    }

    /// The cue for flow moving along `velocity_dir` (unit, map frame), with
    /// the head's left axis `head_left_map` giving the dither's reference.
    #[must_use]
    pub fn cue(
        &self,
        velocity_dir: [f64; 3],
        head_left_map: [f64; 3],
        cfg: &RidgeConfig,
    ) -> RidgeCue {
        let mut out = RidgeCue {
            tilt: [0.0; 3],
            dither: [0.0; 3],
            relative_gradient_per_m: None,
        };
        let Some(u) = unit(velocity_dir) else {
            return out;
        };
        // Dither axes across the flow from the head frame.
        if let Some(e1) = unit(reject(head_left_map, u)) {
            let e2 = cross(u, e1);
            let phase = core::f64::consts::TAU * (self.travelled_m / cfg.dither_wavelength_m);
            let (s, c) = (libm::sin(phase), libm::cos(phase));
            out.dither = [
                cfg.dither_rad * (c * e1[0] + s * e2[0]),
                cfg.dither_rad * (c * e1[1] + s * e2[1]),
                cfg.dither_rad * (c * e1[2] + s * e2[2]),
            ];
        }
        if let Some(g) = self.gradient(u, cfg) {
            let q = self.sq / self.sw;
            if q > 0.0 {
                let gl = reject(g, u);
                let rel = norm(gl) / q;
                if rel.is_finite() {
                    out.relative_gradient_per_m = Some(rel);
                    let want = cfg.gain_m * rel;
                    let tilt = if want > cfg.max_tilt_rad {
                        cfg.max_tilt_rad
                    } else {
                        want
                    };
                    if let Some(dir) = unit(gl) {
                        out.tilt = scale(dir, tilt);
                    }
                }
            }
        }
        out
    }

    /// The fitted gradient of q, Pa/m, map frame; `None` while the window
    /// is short, its lateral spread is below `min_spread_m`, the system is
    /// singular, the lateral gradient is not significant, or q changes
    /// along the flow too fast for the model.
    fn gradient(&self, u: [f64; 3], cfg: &RidgeConfig) -> Option<[f64; 3]> {
        // Enough samples that one or two cannot carry the fit, over at
        // least half a window of travel.
        if self.sw < 20.0 || self.since_clear_m < 0.5 * cfg.window_m {
            return None;
        }
        let m = scale(self.sx, 1.0 / self.sw);
        let qm = self.sq / self.sw;
        let mut c = [[0.0; 3]; 3];
        let mut cq = [0.0; 3];
        for (((crow, srow), &mi), (cqi, &sxqi)) in c
            .iter_mut()
            .zip(self.sxx.iter())
            .zip(m.iter())
            .zip(cq.iter_mut().zip(self.sxq.iter()))
        {
            for ((v, &s), &mj) in crow.iter_mut().zip(srow.iter()).zip(m.iter()) {
                *v = s / self.sw - mi * mj;
            }
            *cqi = sxqi / self.sw - mi * qm;
        }
        // Lateral spread: total variance less the along-flow part.
        let cu = mat_vec(&c, u);
        let lateral_var = c[0][0] + c[1][1] + c[2][2] - dot(u, cu);
        if !(lateral_var.is_finite() && lateral_var >= cfg.min_spread_m * cfg.min_spread_m) {
            return None;
        }
        // Ridge regularisation (a small fraction of the lateral variance):
        // directions the window never moved along get no gradient.
        let lambda = 1e-3 * lateral_var;
        for (i, row) in c.iter_mut().enumerate() {
            if let Some(v) = row.get_mut(i) {
                *v += lambda;
            }
        }
        let g = solve3(&c, cq)?;
        // Significance: the lateral gradient must stand clear of its own
        // standard error (residual variance over the effective sample
        // count, through the inverse position covariance), and the fit
        // must explain the data (a throat or a shock makes q change along
        // the path faster than a straight line follows: the residuals grow
        // and the cue stands down).
        let q_var = self.sqq / self.sw - qm * qm;
        let resid_var = q_var - dot(cq, g);
        let n_eff = self.sw * self.sw / self.sw2;
        let gl = reject(g, u);
        let e = unit(gl)?;
        let ce = solve3(&c, e)?;
        let se2 = resid_var.max(0.0) * dot(e, ce) / (n_eff - 4.0).max(1.0);
        let gl_n = norm(gl);
        let along = libm::fabs(dot(g, u));
        let significant = gl_n * gl_n > SIGNIFICANCE_T2 * se2;
        let smooth = along <= MAX_ALONG_REL_GRADIENT_PER_M * qm;
        (significant && smooth && resid_var.is_finite()).then_some(g)
    }
}

/// Squared t-value the lateral gradient must exceed (3 standard errors).
const SIGNIFICANCE_T2: f64 = 9.0;

/// Along-flow relative gradient of q above which the conduit is changing
/// too fast for the straight-line model (throats, shocks, junction mixing),
/// 1/m.
const MAX_ALONG_REL_GRADIENT_PER_M: f64 = 0.15;

fn cross(a: [f64; 3], b: [f64; 3]) -> [f64; 3] {
    [
        a[1] * b[2] - a[2] * b[1],
        a[2] * b[0] - a[0] * b[2],
        a[0] * b[1] - a[1] * b[0],
    ]
}

fn mat_vec(m: &[[f64; 3]; 3], v: [f64; 3]) -> [f64; 3] {
    [dot(m[0], v), dot(m[1], v), dot(m[2], v)]
}

/// `m x = b` by Cramer's rule (3 x 3); `None` when (nearly) singular.
fn solve3(m: &[[f64; 3]; 3], b: [f64; 3]) -> Option<[f64; 3]> {
    let c0 = [m[0][0], m[1][0], m[2][0]];
    let c1 = [m[0][1], m[1][1], m[2][1]];
    let c2 = [m[0][2], m[1][2], m[2][2]];
    let det = dot(c0, cross(c1, c2));
    let scale_ref = norm(c0) * norm(c1) * norm(c2);
    if !(det.is_finite() && scale_ref > 0.0 && libm::fabs(det) > 1e-12 * scale_ref) {
        return None;
    }
    let x = [
        dot(b, cross(c1, c2)) / det,
        dot(c0, cross(b, c2)) / det,
        dot(c0, cross(c1, b)) / det,
    ];
    x.iter().all(|v| v.is_finite()).then_some(x)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A straight conduit along +x, radius 0.6 m, turbulent 1/7-power
    /// profile; the robot drifts across it with the dither. The cue must
    /// point back toward the axis.
    #[test]
    fn cue_points_to_the_axis_from_either_side() {
        let cfg = RidgeConfig::for_robot(0.06);
        let r = 0.6;
        let q_at = |p: [f64; 3]| {
            let rho = libm::sqrt(p[1] * p[1] + p[2] * p[2]);
            0.8 * libm::pow(1.0 - (rho / r).min(1.0), 2.0 / 7.0)
        };
        for &(y0, z0) in &[(0.25, 0.0), (-0.2, 0.1), (0.05, -0.3)] {
            let mut s = RidgeSeeker::NEW;
            let mut p = [0.0, y0, z0];
            for k in 0..2000 {
                // Helical wiggle of 1 cm about a straight line, plus a
                // slow along-axis q change the fit must absorb.
                let ph = core::f64::consts::TAU * s.travelled_m() / cfg.dither_wavelength_m;
                let _ = k;
                p[0] += 0.0015;
                let w = [p[0], y0 + 0.01 * libm::cos(ph), z0 + 0.01 * libm::sin(ph)];
                s.add(w, q_at(w) * (1.0 + 0.01 * p[0]), [-1.0, 0.0, 0.0], &cfg);
            }
            let cue = s.cue([-1.0, 0.0, 0.0], [0.0, 1.0, 0.0], &cfg);
            let toward = unit([0.0, -y0, -z0]).unwrap();
            let t = unit(cue.tilt).expect("a trusted cue");
            assert!(dot(t, toward) > 0.95, "({y0},{z0}): tilt {t:?}");
            assert!(cue.relative_gradient_per_m.unwrap() > 0.3);
        }
    }

    #[test]
    fn no_cue_without_lateral_spread() {
        let cfg = RidgeConfig::for_robot(0.06);
        let mut s = RidgeSeeker::NEW;
        for k in 0..500 {
            s.add(
                [f64::from(k) * 0.002, 0.1, 0.0],
                1.0 + 0.1 * f64::from(k),
                [1.0, 0.0, 0.0],
                &cfg,
            );
        }
        let cue = s.cue([1.0, 0.0, 0.0], [0.0, 1.0, 0.0], &cfg);
        assert_eq!(cue.tilt, [0.0; 3]);
        assert!(cue.relative_gradient_per_m.is_none());
    }

    #[test]
    fn dither_is_across_the_flow_and_turns_with_travel() {
        let cfg = RidgeConfig::for_robot(0.06);
        let mut s = RidgeSeeker::NEW;
        let u = unit([1.0, 1.0, 0.0]).unwrap();
        let mut seen = [0.0f64; 2];
        let mut x = 0.0;
        for _ in 0..2000 {
            x += 0.001;
            s.add([x, 0.0, 0.0], 1.0, u, &cfg);
            let c = s.cue(u, [0.0, 1.0, 0.0], &cfg);
            assert!(dot(c.dither, u).abs() < 1e-12);
            assert!((norm(c.dither) - cfg.dither_rad).abs() < 1e-12);
            seen[0] = seen[0].max(c.dither[2]);
            seen[1] = seen[1].min(c.dither[2]);
        }
        // Two metres are more than a turn: both senses across were visited.
        assert!(seen[0] > 0.9 * cfg.dither_rad && seen[1] < -0.9 * cfg.dither_rad);
    }
}
