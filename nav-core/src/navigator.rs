//! The lower-level decision stage: a validated configuration in, one
//! map-frame observation per step in, one [`Command`] out. Embedders
//! normally use [`crate::onboard::FrameNavigator`], the one entry point,
//! which turns raw sensor frames into these observations; use this level
//! only with a probe and tactile pipeline of your own.
//!
//! `Navigator<P, C, S, W, JN>`: `P` probe ports (<= 32), `C` contact
//! sensors (<= 64), `S` stations, `W` wall points, `JN` junctions. Built
//! once by [`Navigator::new`]; after that no allocation, no panics, and
//! bounded work per step (the dominant terms are one `O(W)` nearest-wall
//! query and one `O(S)` back-out cursor walk at most).
//!
//! ## Frames out of order
//! Frames are processed at once, never delayed: a reorder buffer would add
//! its whole window as latency to every command. A frame older than the
//! last processed one but within `reorder_window_s` is *late*: its wall
//! points are merged into the wall index (order does not matter there) and
//! the rest is ignored, because the flow filter, health counters and the
//! decision memory are time-ordered. Older frames are dropped as stale. In
//! both cases the previous command is repeated with the frame's
//! disposition in its record. A frame with a non-finite time is dropped.
//! Which stamps are trusted, and for how long a late frame may repeat a
//! moving command, is [`crate::trust`]'s call: a frame it does not trust
//! (not finite, stale, a forward jump, a clock that stopped) never keeps
//! the robot moving: the command holds
//! ([`ReasonCode::HoldClockUntrusted`]) until stamps are trusted again.
//! Poses are checked for plausibility there too.
//! Channels with non-finite or out-of-range values are rejected one by
//! one (`FrameDisposition::PartlyRejected`), the rest of the frame is used.

use crate::decide::{
    DecideConfig, DecideState, Decision, DecisionRecord, FlowObservation, FrameDisposition,
    HealthFlags, HealthView, Perception, Phase, ReasonCode, SpeedLimit, StallWatch,
    WallObservation, decide,
};
use crate::digest::Fnv64;
use crate::flow_window::{WindowEstimate, WindowStatus};
use crate::frame::HeadPose;
use crate::health::{HealthConfig, HealthReport, HealthState, OperatingMode};
use crate::map::{
    BranchOrigin, BranchStatus, FlowEstimate, Junction, LocalMap, Section, Station, WallIndex, add,
    disc_area_m2, dist_sq, dot, finite3, head_forward_map, mass_flux_proxy, scale, sub, unit,
};
use crate::trust::{ClockConfig, ClockVerdict, FrameClock, PoseLimits};

/// One step's input: what the probe and tactile layers made of one sensor
/// frame, already in the map frame.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Observation {
    /// Sample time, s, on the robot's monotonic clock.
    pub time_s: f64,
    /// Head pose (from `SensorFrame::pose`); the last one is reused when
    /// absent.
    pub pose: Option<HeadPose>,
    /// Flow solution, if the probe reported.
    pub flow: Option<FlowObservation>,
    /// Wall geometry, if the tactile layer reported.
    pub wall: Option<WallObservation>,
}

/// Health flags, mode and decision for one step.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub struct Command {
    /// Frame time on the navigator's clock, s: the frame's stamp, plus the
    /// offset of any re-anchor after a clock reset or jump
    /// ([`crate::trust`]).
    pub time_s: f64,
    /// Direction of motion of the head, unit, map frame.
    pub heading_map: [f64; 3],
    /// Speed, m/s (>= 0).
    pub speed_m_per_s: f64,
    /// Move tail first (retracing stations).
    pub reverse: bool,
    /// Effective operating mode.
    pub mode: OperatingMode,
    /// Why.
    pub record: DecisionRecord,
    /// Sensor and channel health.
    pub health: HealthFlags,
}

impl Command {
    /// Feed every field that matters for determinism into `d`.
    pub fn digest_into(&self, d: &mut Fnv64) {
        d.f64(self.time_s);
        d.f64s(&self.heading_map);
        d.f64(self.speed_m_per_s);
        d.u64(u64::from(self.reverse));
        d.u64(self.mode as u64);
        let r = &self.record;
        d.u64(r.reason as u64);
        d.u64(r.frame as u64);
        d.u64(r.speed_limit as u64);
        d.u64(phase_code(&r.phase));
        for v in [
            r.standoff_m,
            r.section_radius_m,
            r.centre_offset_m,
            r.nearest_wall_m,
            r.throat_diameter_m,
            r.throat_distance_m,
        ] {
            d.f64(v.unwrap_or(-1.0));
        }
        d.f64s(&r.upstream_map.unwrap_or([0.0; 3]));
        d.f64(r.flow_dir_sigma_rad);
        d.f64(r.dynamic_pressure_pa);
        d.f64(r.flow_weak_for_s);
        d.f64(r.ridge_gradient_per_m.unwrap_or(-1.0));
        if let Some(b) = &r.branch {
            d.u64(u64::from(b.junction));
            d.u64(b.chosen.map_or(99, u64::from));
            d.u64(b.runner_up.map_or(99, u64::from));
            d.u64(u64::from(b.held_by_hysteresis));
            d.f64(b.continuity_residual);
            d.f64s(&b.flux_kg_per_s);
            d.f64s(&b.width_m);
        }
        if let Some(s) = &r.stall {
            d.u64(s.load as u64);
            d.f64(s.window_s);
            d.f64(s.expected_m);
            d.f64(s.advanced_m);
        }
        if let Some(e) = &r.dead_end {
            d.u64(e.cause as u64);
            d.f64(e.width_m.unwrap_or(-1.0));
            d.u64(e.junction.map_or(u64::MAX, u64::from));
            d.u64(e.next_branch.map_or(99, u64::from));
        }
        d.u64(u64::from(self.health.failed_ports));
        d.u64(self.health.failed_contacts);
        d.u64(self.health.flow as u64);
        d.u64(self.health.tactile as u64);
    }
}

/// A number for the phase (kind and ids), for digests and traces.
#[must_use]
pub fn phase_code(p: &Phase) -> u64 {
    match *p {
        Phase::Follow => 1,
        Phase::Sample {
            junction, branch, ..
        } => 2 | (u64::from(junction) << 8) | (u64::from(branch) << 24),
        Phase::Enter { junction, branch } => {
            3 | (u64::from(junction) << 8) | (u64::from(branch) << 24)
        }
        Phase::BackOut {
            junction,
            cursor_seq,
            ..
        } => 4 | (u64::from(junction) << 8) | (u64::from(cursor_seq) << 24),
        Phase::GaveUp => 5,
        Phase::AtSource => 6,
    }
}

/// Everything the navigator needs, before validation.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct NavConfig {
    /// Decision thresholds (robot radius, margins, speeds, hysteresis...).
    pub decide: DecideConfig,
    /// Health thresholds.
    pub health: HealthConfig,
    /// Flow direction process noise, rad^2 per second.
    pub flow_dir_process_noise_rad2_per_s: f64,
    /// Dynamic pressure process noise, Pa^2 per second.
    pub dynamic_pressure_process_noise_pa2_per_s: f64,
    /// A direction observation at an angle beyond this from the fused one
    /// is an outlier, rad.
    pub flow_outlier_rad: f64,
    /// Consecutive outliers that reset the filter to the observation.
    pub flow_outlier_reset: u8,
    /// Centring on the dynamic-pressure ridge where no wall is felt.
    pub ridge: crate::ridge::RidgeConfig,
    /// Junctions seen through the flow where the conduit is too wide to
    /// feel across.
    pub flow_turn: crate::flow_turn::FlowTurnConfig,
    /// Distance between stations, m.
    pub station_spacing_m: f64,
    /// Late frames within this are merged (wall points only), s.
    pub reorder_window_s: f64,
    /// A pose older than this stops the robot, s.
    pub pose_timeout_s: f64,
    /// Which frame stamps are trusted (see [`crate::trust`]).
    pub clock: ClockConfig,
    /// Which head poses are plausible (see [`crate::trust`]).
    pub pose_limits: PoseLimits,
}

/// Which configuration field is wrong.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ConfigField {
    /// `decide.robot_radius_m`.
    RobotRadius,
    /// `decide.standoff_margin_m`.
    StandoffMargin,
    /// `decide.width_margin_m`.
    WidthMargin,
    /// `decide.cruise_speed_m_per_s` / creep / junction speed ordering.
    Speeds,
    /// `decide.slow_band_m`.
    SlowBand,
    /// `decide.throat_lookahead_m`.
    ThroatLookahead,
    /// `decide.centring_gain`.
    CentringGain,
    /// `decide.min_dynamic_pressure_pa`.
    MinDynamicPressure,
    /// `decide.lost_flow_s`.
    LostFlowTime,
    /// `decide.min_branch_flux_kg_per_s`.
    MinBranchFlux,
    /// `decide.branch_hysteresis_frac`.
    Hysteresis,
    /// `decide.min_branch_samples`.
    MinBranchSamples,
    /// `decide.sample_timeout_s`.
    SampleTimeout,
    /// `decide.sample_align_rad`.
    SampleAlign,
    /// `decide.junction_radius_m`.
    JunctionRadius,
    /// `decide.divergence_rad`.
    Divergence,
    /// `decide.continuity_tolerance`.
    ContinuityTolerance,
    /// `decide.arrive_m`.
    Arrive,
    /// `decide.came_from_cos`.
    CameFrom,
    /// `health.*` counts.
    HealthCounts,
    /// `health.*` times.
    HealthTimes,
    /// Filter noise settings.
    FilterNoise,
    /// `ridge.*` (dynamic-pressure ridge seeking).
    Ridge,
    /// `flow_turn.*` (junctions seen through the flow).
    FlowTurn,
    /// `station_spacing_m`.
    StationSpacing,
    /// `reorder_window_s` / `pose_timeout_s` / `clock.*`.
    FrameTiming,
    /// `pose_limits.*`.
    PoseLimits,
    /// `decide.skin_compliance_m` / `decide.sensing_latency_s`: the feel
    /// speed must let the skin stop the head within its compliance.
    TouchSpeed,
    /// `decide.stall_distance_m` / `decide.stall_fraction`.
    Stall,
    /// A capacity const generic (`P > 32`, `C > 64`, or `S`, `W`, `JN` zero).
    Capacity,
}

/// A configuration the navigator refused.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ConfigError {
    /// Which field.
    pub field: ConfigField,
    /// The offending value (or the first of them).
    pub value: f64,
}

/// A configuration that passed [`NavConfig::validate`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ValidConfig(NavConfig);

impl ValidConfig {
    /// The configuration.
    #[must_use]
    pub const fn get(&self) -> &NavConfig {
        &self.0
    }
}

fn pos(field: ConfigField, v: f64) -> Result<(), ConfigError> {
    if v.is_finite() && v > 0.0 {
        Ok(())
    } else {
        Err(ConfigError { field, value: v })
    }
}
fn nonneg(field: ConfigField, v: f64) -> Result<(), ConfigError> {
    if v.is_finite() && v >= 0.0 {
        Ok(())
    } else {
        Err(ConfigError { field, value: v })
    }
}
fn check(field: ConfigField, v: f64, ok: bool) -> Result<(), ConfigError> {
    if ok && v.is_finite() {
        Ok(())
    } else {
        Err(ConfigError { field, value: v })
    }
}

impl NavConfig {
    /// A reasonable configuration for a robot of radius `robot_radius_m`
    /// (defaults chosen for the demo scenarios; common practice, not from a
    /// published source).
    #[must_use]
    pub fn for_robot(robot_radius_m: f64) -> Self {
        let r = robot_radius_m;
        Self {
            decide: DecideConfig {
                robot_radius_m: r,
                standoff_margin_m: 0.5 * r,
                width_margin_m: 0.5 * r,
                cruise_speed_m_per_s: 0.3,
                creep_speed_m_per_s: 0.05,
                junction_speed_m_per_s: 0.1,
                feel_speed_m_per_s: 0.15,
                slow_band_m: 2.0 * r,
                throat_lookahead_m: 20.0 * r,
                centring_gain: 1.0,
                min_dynamic_pressure_pa: 0.5,
                lost_flow_s: 3.0,
                min_branch_flux_kg_per_s: 1e-4,
                branch_hysteresis_frac: 0.15,
                min_branch_samples: 5,
                sample_timeout_s: 2.0,
                sample_align_rad: 0.2,
                junction_radius_m: 12.0 * r,
                divergence_rad: 0.5,
                continuity_tolerance: 0.5,
                arrive_m: 2.0 * r,
                came_from_cos: -0.5,
                // A 5 mm skin, as the demo robots' (invented). The latency
                // is three 10 ms frames: the touch sampled, the command
                // computed, the drive answering (an assumption, not a
                // measured figure). Feel speed * latency = 4.5 mm, within
                // the skin.
                skin_compliance_m: 0.005,
                sensing_latency_s: 0.03,
                // A stall must command 4 cm (well above the odometry's
                // 5 mm/sqrt(m) walk over that distance) and show less than
                // a quarter of it.
                stall_distance_m: 0.04,
                stall_fraction: 0.25,
            },
            health: HealthConfig {
                suspect_to_failed_frames: 10,
                recover_frames: 10,
                min_ports_usable: 4,
                min_contacts_usable: 3,
                flow_timeout_s: 0.5,
                tactile_timeout_s: 1.0,
                mode_recover_s: 1.0,
            },
            flow_dir_process_noise_rad2_per_s: 0.05,
            dynamic_pressure_process_noise_pa2_per_s: 1.0,
            flow_outlier_rad: 1.2,
            flow_outlier_reset: 5,
            ridge: crate::ridge::RidgeConfig::for_robot(r),
            flow_turn: crate::flow_turn::FlowTurnConfig::for_robot(r),
            station_spacing_m: 2.0 * r,
            reorder_window_s: 0.2,
            pose_timeout_s: 0.5,
            clock: ClockConfig::DEFAULT,
            pose_limits: PoseLimits::DEFAULT,
        }
    }

    /// Check every field.
    ///
    /// # Errors
    /// [`ConfigError`] naming the first bad field and its value.
    pub fn validate(&self) -> Result<ValidConfig, ConfigError> {
        use ConfigField as F;
        let d = &self.decide;
        pos(F::RobotRadius, d.robot_radius_m)?;
        nonneg(F::StandoffMargin, d.standoff_margin_m)?;
        nonneg(F::WidthMargin, d.width_margin_m)?;
        pos(F::Speeds, d.creep_speed_m_per_s)?;
        check(
            F::Speeds,
            d.cruise_speed_m_per_s,
            d.cruise_speed_m_per_s >= d.junction_speed_m_per_s
                && d.junction_speed_m_per_s >= d.creep_speed_m_per_s
                && d.cruise_speed_m_per_s >= d.feel_speed_m_per_s
                && d.feel_speed_m_per_s >= d.creep_speed_m_per_s,
        )?;
        pos(F::SlowBand, d.slow_band_m)?;
        pos(F::ThroatLookahead, d.throat_lookahead_m)?;
        nonneg(F::CentringGain, d.centring_gain)?;
        nonneg(F::MinDynamicPressure, d.min_dynamic_pressure_pa)?;
        pos(F::LostFlowTime, d.lost_flow_s)?;
        nonneg(F::MinBranchFlux, d.min_branch_flux_kg_per_s)?;
        check(
            F::Hysteresis,
            d.branch_hysteresis_frac,
            d.branch_hysteresis_frac >= 0.0 && d.branch_hysteresis_frac <= 10.0,
        )?;
        check(
            F::MinBranchSamples,
            f64::from(d.min_branch_samples),
            d.min_branch_samples >= 1 && d.min_branch_samples <= 10_000,
        )?;
        pos(F::SampleTimeout, d.sample_timeout_s)?;
        check(
            F::SampleAlign,
            d.sample_align_rad,
            d.sample_align_rad > 0.0 && d.sample_align_rad < core::f64::consts::FRAC_PI_2,
        )?;
        check(
            F::JunctionRadius,
            d.junction_radius_m,
            d.junction_radius_m > d.arrive_m,
        )?;
        check(
            F::Divergence,
            d.divergence_rad,
            d.divergence_rad > 0.0 && d.divergence_rad < core::f64::consts::PI,
        )?;
        nonneg(F::ContinuityTolerance, d.continuity_tolerance)?;
        pos(F::Arrive, d.arrive_m)?;
        pos(F::TouchSpeed, d.skin_compliance_m)?;
        pos(F::TouchSpeed, d.sensing_latency_s)?;
        check(
            F::TouchSpeed,
            d.feel_speed_m_per_s,
            d.feel_speed_m_per_s <= d.touch_speed_m_per_s(),
        )?;
        pos(F::Stall, d.stall_distance_m)?;
        check(
            F::Stall,
            d.stall_fraction,
            d.stall_fraction > 0.0 && d.stall_fraction < 1.0,
        )?;
        check(
            F::CameFrom,
            d.came_from_cos,
            d.came_from_cos >= -1.0 && d.came_from_cos <= 1.0,
        )?;
        let h = &self.health;
        check(
            F::HealthCounts,
            f64::from(h.suspect_to_failed_frames),
            h.suspect_to_failed_frames >= 1 && h.recover_frames >= 1,
        )?;
        pos(F::HealthTimes, h.flow_timeout_s)?;
        pos(F::HealthTimes, h.tactile_timeout_s)?;
        nonneg(F::HealthTimes, h.mode_recover_s)?;
        nonneg(F::FilterNoise, self.flow_dir_process_noise_rad2_per_s)?;
        nonneg(
            F::FilterNoise,
            self.dynamic_pressure_process_noise_pa2_per_s,
        )?;
        check(
            F::FilterNoise,
            self.flow_outlier_rad,
            self.flow_outlier_rad > 0.0 && self.flow_outlier_rad <= core::f64::consts::PI,
        )?;
        check(F::Ridge, self.ridge.window_m, self.ridge.is_valid())?;
        check(
            F::FlowTurn,
            self.flow_turn.window_m,
            self.flow_turn.is_valid(),
        )?;
        pos(F::StationSpacing, self.station_spacing_m)?;
        nonneg(F::FrameTiming, self.reorder_window_s)?;
        pos(F::FrameTiming, self.pose_timeout_s)?;
        check(
            F::FrameTiming,
            self.clock.max_forward_jump_s,
            self.clock.is_valid(),
        )?;
        check(
            F::PoseLimits,
            self.pose_limits.max_abs_position_m,
            self.pose_limits.is_valid(),
        )?;
        Ok(ValidConfig(*self))
    }
}

/// The streamline filter: fused velocity direction (map frame) with its
/// covariance, and fused dynamic pressure with its variance.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FlowFilter {
    /// Current estimate.
    pub est: FlowEstimate,
    /// Time of the last update, s.
    pub last_update_s: f64,
    /// Since when the fused dynamic pressure has been below the lost-flow
    /// threshold.
    pub weak_since_s: Option<f64>,
    /// When the windowed estimate was last resolved, s.
    pub window_resolved_s: f64,
    /// Consecutive direction outliers.
    pub outliers: u8,
}

/// After the windowed estimate loses its resolution, its (still best)
/// direction is followed for this long before the robot stops to dwell:
/// the head's own motion in air slower than the crawl makes the window's
/// sigma wander across the limit, and stopping at every crossing left the
/// robot switching between following and dwelling frame by frame. Ours,
/// not from a published source.
pub const WEAK_FOLLOW_GRACE_S: f64 = 2.0;

/// Variance floor on the diagonal, rad^2 (keeps the innovation covariance
/// invertible when an observation claims zero uncertainty).
const DIR_VAR_FLOOR: f64 = 1e-8;
/// Variance cap on the diagonal, rad^2 (an uninformative direction).
const DIR_VAR_CAP: f64 = 1.0;

impl FlowFilter {
    /// Empty filter.
    pub const NEW: Self = Self {
        est: FlowEstimate::NONE,
        last_update_s: f64::NEG_INFINITY,
        weak_since_s: None,
        window_resolved_s: f64::NEG_INFINITY,
        outliers: 0,
    };

    fn update(&mut self, o: &FlowObservation, dir: [f64; 3], t: f64, cfg: &NavConfig) {
        use nalgebra::{Matrix3, Vector3};
        // A reading within the outlier angle of the *reverse* of the fused
        // direction is its mirror image: under the sphere model a flow and
        // its reverse give the same port pressures (Cp depends on
        // sin^2 theta), so a head turned away from the flow reads the flow
        // as coming from ahead. Take the reverse; the fused history fixes
        // the sense.
        let dir = match self.est.velocity_dir_map {
            Some(x0) if dot(x0, dir) < -libm::cos(cfg.flow_outlier_rad) => scale(dir, -1.0),
            _ => dir,
        };
        let dt = if self.last_update_s.is_finite() {
            let d = t - self.last_update_s;
            if d > 0.0 { d } else { 0.0 }
        } else {
            0.0
        };
        let m3 = |c: &[[f64; 3]; 3]| {
            Matrix3::from_fn(|i, j| c.get(i).and_then(|r| r.get(j)).copied().unwrap_or(0.0))
        };
        let mut r = m3(&o.dir_cov_map);
        for i in 0..3 {
            if let Some(v) = r.get_mut((i, i))
                && *v < DIR_VAR_FLOOR
            {
                *v = DIR_VAR_FLOOR;
            }
        }
        let z = Vector3::new(dir[0], dir[1], dir[2]);
        let reset = |f: &mut Self| {
            f.est.velocity_dir_map = Some(dir);
            f.est.dir_cov = to_arr(&r);
            f.outliers = 0;
        };
        match self.est.velocity_dir_map {
            None => reset(self),
            Some(x0) => {
                let x = Vector3::new(x0[0], x0[1], x0[2]);
                let mut p = m3(&self.est.dir_cov);
                let grow = cfg.flow_dir_process_noise_rad2_per_s * dt;
                for i in 0..3 {
                    if let Some(v) = p.get_mut((i, i)) {
                        *v += grow;
                        if *v > DIR_VAR_CAP {
                            *v = DIR_VAR_CAP;
                        }
                    }
                }
                if x.dot(&z) < libm::cos(cfg.flow_outlier_rad) {
                    self.outliers = self.outliers.saturating_add(1);
                    self.est.dir_cov = to_arr(&p);
                    if self.outliers >= cfg.flow_outlier_reset {
                        reset(self);
                    }
                } else if let Some(s_inv) = (p + r).try_inverse() {
                    let k = p * s_inv;
                    let xn = x + k * (z - x);
                    let pn = (Matrix3::identity() - k) * p;
                    let pn = (pn + pn.transpose()) * 0.5;
                    match unit([xn.x, xn.y, xn.z]) {
                        Some(u) => {
                            self.est.velocity_dir_map = Some(u);
                            self.est.dir_cov = to_arr(&pn);
                            self.outliers = 0;
                        }
                        None => reset(self),
                    }
                } else {
                    reset(self);
                }
            }
        }
        // Dynamic pressure: scalar Kalman filter.
        let meas_var = {
            let s = o.dynamic_pressure_sigma_pa;
            let v = s * s;
            if v > 1e-12 { v } else { 1e-12 }
        };
        if self.last_update_s.is_finite() {
            let pv = self.est.dynamic_pressure_var_pa2
                + cfg.dynamic_pressure_process_noise_pa2_per_s * dt;
            let k = pv / (pv + meas_var);
            self.est.dynamic_pressure_pa +=
                k * (o.dynamic_pressure_pa - self.est.dynamic_pressure_pa);
            self.est.dynamic_pressure_var_pa2 = (1.0 - k) * pv;
        } else {
            self.est.dynamic_pressure_pa = o.dynamic_pressure_pa;
            self.est.dynamic_pressure_var_pa2 = meas_var;
        }
        self.est.density_kg_per_m3 = o.density_kg_per_m3;
        self.last_update_s = t;
        if self.est.dynamic_pressure_pa < cfg.decide.min_dynamic_pressure_pa {
            if self.weak_since_s.is_none() {
                self.weak_since_s = Some(t);
            }
        } else {
            self.weak_since_s = None;
        }
    }
}

impl FlowFilter {
    /// Take a windowed estimate as the fused flow (it already holds the
    /// evidence of many frames: fusing it again each frame would count the
    /// same frames many times over). An unresolved window leaves no
    /// direction, so the decision stage does not steer on it.
    fn follow_window(&mut self, w: &WindowEstimate, t: f64) {
        if w.status == WindowStatus::Resolved {
            self.window_resolved_s = t;
        }
        let follow = self.window_followable(w, t);
        self.est = FlowEstimate {
            velocity_dir_map: if follow { w.velocity_dir_map } else { None },
            dir_cov: w.dir_cov_map,
            dynamic_pressure_pa: w.dynamic_pressure_pa,
            dynamic_pressure_var_pa2: w.dynamic_pressure_sigma_pa * w.dynamic_pressure_sigma_pa,
            density_kg_per_m3: w.density_kg_per_m3,
        };
        self.last_update_s = t;
        self.outliers = 0;
        if w.status == WindowStatus::NoUsableFlow {
            if self.weak_since_s.is_none() {
                self.weak_since_s = Some(t);
            }
        } else {
            self.weak_since_s = None;
        }
    }
}

impl FlowFilter {
    /// The window's direction is followed: resolved now, or resolved within
    /// [`WEAK_FOLLOW_GRACE_S`] and not yet bounded below usable flow.
    fn window_followable(&self, w: &WindowEstimate, t: f64) -> bool {
        match w.status {
            WindowStatus::Resolved => true,
            WindowStatus::Integrating | WindowStatus::DwellExpired => {
                t - self.window_resolved_s <= WEAK_FOLLOW_GRACE_S
            }
            _ => false,
        }
    }
}

/// A windowed estimate fit to steer on: finite numbers, a unit direction.
fn window_ok(w: &WindowEstimate) -> bool {
    let dir_ok = w
        .velocity_dir_map
        .is_none_or(|d| finite3(d) && unit(d).is_some());
    dir_ok
        && w.dir_cov_map
            .iter()
            .all(|r| r.iter().all(|v| v.is_finite()))
        && w.dynamic_pressure_pa.is_finite()
        && w.dynamic_pressure_sigma_pa.is_finite()
        && w.density_kg_per_m3.is_finite()
        && w.density_kg_per_m3 > 0.0
}

/// In weak flow: follow the windowed estimate under its own reason, or,
/// with no direction resolved yet and the window still integrating
/// (`dwell`), stop and integrate instead of wandering by feel. After the
/// longest dwell the robot moves on by feel (the window keeps
/// integrating as it goes).
fn weak_flow_conduct(d: &mut Decision, dwell: bool) {
    if d.mode != OperatingMode::FlowWeak {
        return;
    }
    match d.record.reason {
        ReasonCode::FollowUpstream => d.record.reason = ReasonCode::FollowWeakFlow,
        ReasonCode::FollowByFeel if dwell => {
            d.record.reason = ReasonCode::DwellWeakFlow;
            d.record.speed_limit = SpeedLimit::Stopped;
            d.speed_m_per_s = 0.0;
        }
        _ => {}
    }
}

fn to_arr(m: &nalgebra::Matrix3<f64>) -> [[f64; 3]; 3] {
    crate::decide::mat3_to_arr(m)
}

/// Plausibility limits on a flow observation and a section, beyond which
/// a finite number is still absurd and would overflow the arithmetic
/// downstream (squares, traces): a direction variance of 1e3 rad^2 (far
/// past uninformative), a dynamic pressure or its sigma of 1e9 Pa, a
/// density of 1e5 kg/m^3, a section of 1e6 m (the map's size, see
/// [`PoseLimits`]). Common practice margins, not from a published source.
const MAX_DIR_COV_RAD2: f64 = 1.0e3;
const MAX_PRESSURE_PA: f64 = 1.0e9;
const MAX_DENSITY_KG_PER_M3: f64 = 1.0e5;
const MAX_SECTION_M: f64 = 1.0e6;

fn flow_dir_ok(o: &FlowObservation) -> Option<[f64; 3]> {
    let dir = o.velocity_dir_map?;
    let cov_ok = o.dir_cov_map.iter().all(|r| {
        r.iter()
            .all(|v| v.is_finite() && v.abs() <= MAX_DIR_COV_RAD2)
    }) && o
        .dir_cov_map
        .iter()
        .enumerate()
        .all(|(i, r)| r.get(i).is_some_and(|v| *v >= 0.0));
    let scalars_ok = o.dynamic_pressure_pa.is_finite()
        && o.dynamic_pressure_pa >= 0.0
        && o.dynamic_pressure_pa <= MAX_PRESSURE_PA
        && o.dynamic_pressure_sigma_pa.is_finite()
        && o.dynamic_pressure_sigma_pa >= 0.0
        && o.dynamic_pressure_sigma_pa <= MAX_PRESSURE_PA
        && o.density_kg_per_m3.is_finite()
        && o.density_kg_per_m3 > 0.0
        && o.density_kg_per_m3 <= MAX_DENSITY_KG_PER_M3;
    if cov_ok && scalars_ok {
        unit(dir)
    } else {
        None
    }
}

fn section_ok(s: &Section) -> bool {
    match *s {
        Section::Unknown => true,
        Section::LowerBoundOnly { min_radius_m } => {
            min_radius_m.is_finite() && (0.0..=MAX_SECTION_M).contains(&min_radius_m)
        }
        Section::Circle {
            centre_m,
            radius_m,
            centre_sigma_m,
            radius_sigma_m,
        } => {
            let within = |v: f64| v.is_finite() && v.abs() <= MAX_SECTION_M;
            centre_m.iter().all(|v| within(*v))
                && within(radius_m)
                && radius_m > 0.0
                && within(centre_sigma_m)
                && within(radius_sigma_m)
        }
    }
}

/// The navigator. See the module doc.
#[derive(Debug, Clone)]
pub struct Navigator<
    const P: usize,
    const C: usize,
    const S: usize,
    const W: usize,
    const JN: usize,
> {
    cfg: NavConfig,
    health: HealthState<P, C>,
    map: LocalMap<S, W, JN>,
    filter: FlowFilter,
    ridge: crate::ridge::RidgeSeeker,
    /// Smoothed head velocity from successive poses, map frame, m/s.
    head_velocity: Option<[f64; 3]>,
    section: Section,
    section_time_s: f64,
    state: DecideState,
    pose: Option<HeadPose>,
    pose_time_s: f64,
    /// Position of the last accepted pose (kept past the pose timeout,
    /// for the jump check), m.
    good_position_m: Option<[f64; 3]>,
    clock: FrameClock,
    last: Option<Command>,
    steps: u64,
    heading_set: bool,
}

/// A navigator sized for a 7-port probe, 32 contact sensors, 128 stations,
/// 512 wall points and 8 junctions.
pub type StandardNavigator = Navigator<7, 32, 128, 512, 8>;

impl<const P: usize, const C: usize, const S: usize, const W: usize, const JN: usize>
    Navigator<P, C, S, W, JN>
{
    /// Build from a validated configuration.
    ///
    /// # Errors
    /// [`ConfigError`] with [`ConfigField::Capacity`] when `P > 32`,
    /// `C > 64`, or any of `S`, `W`, `JN` is zero.
    pub fn new(cfg: ValidConfig) -> Result<Self, ConfigError> {
        let bad = P > 32 || C > 64 || S == 0 || W == 0 || JN == 0 || JN > usize::from(u16::MAX);
        if bad {
            return Err(ConfigError {
                field: ConfigField::Capacity,
                value: 0.0,
            });
        }
        let c = *cfg.get();
        Ok(Self {
            cfg: c,
            health: HealthState::new(c.health),
            map: LocalMap::new(),
            filter: FlowFilter::NEW,
            ridge: crate::ridge::RidgeSeeker::NEW,
            head_velocity: None,
            section: Section::Unknown,
            section_time_s: f64::NEG_INFINITY,
            state: DecideState {
                phase: Phase::Follow,
                in_junction: None,
                last_heading_map: [1.0, 0.0, 0.0],
                stall: StallWatch::NEW,
            },
            pose: None,
            pose_time_s: f64::NEG_INFINITY,
            good_position_m: None,
            clock: FrameClock::new(c.clock, c.reorder_window_s),
            last: None,
            steps: 0,
            heading_set: false,
        })
    }

    /// The local map.
    #[must_use]
    pub const fn map(&self) -> &LocalMap<S, W, JN> {
        &self.map
    }
    /// Sensor and channel health.
    #[must_use]
    pub const fn health(&self) -> &HealthState<P, C> {
        &self.health
    }
    /// The streamline filter.
    #[must_use]
    pub const fn flow_filter(&self) -> &FlowFilter {
        &self.filter
    }
    /// Decision memory.
    #[must_use]
    pub const fn decide_state(&self) -> &DecideState {
        &self.state
    }
    /// The frame-stamp judge.
    #[must_use]
    pub const fn clock(&self) -> &FrameClock {
        &self.clock
    }

    /// Whether `pose`, stamped at navigator time `time_s`, is plausible
    /// after the last accepted pose (see [`PoseLimits`]).
    #[must_use]
    pub fn pose_plausible(&self, pose: &HeadPose, time_s: f64) -> bool {
        self.cfg.pose_limits.plausible(
            pose,
            time_s,
            self.good_position_m.map(|p| (p, self.pose_time_s)),
        )
    }

    /// The configuration in force.
    #[must_use]
    pub const fn config(&self) -> &NavConfig {
        &self.cfg
    }

    fn flags(&self) -> HealthFlags {
        HealthFlags {
            flow: self.health.flow.state,
            tactile: self.health.tactile.state,
            failed_ports: self.health.failed_port_mask(),
            failed_contacts: self.health.failed_contact_mask(),
            health_mode: self.health.mode,
        }
    }

    /// Smoothed head velocity from pose differences (an exponential mean
    /// over about five frames; a gap over 0.2 s restarts it).
    fn track_head_velocity(&mut self, pos: [f64; 3], t: f64) {
        // `self.pose` is still the previous pose here.
        if let Some(p0) = self.pose.map(|p| p.position_m) {
            let dt = t - self.pose_time_s;
            if dt > 0.0 && dt <= 0.2 {
                let v = scale(sub(pos, p0), 1.0 / dt);
                self.head_velocity = Some(match self.head_velocity {
                    Some(h) if finite3(h) => add(scale(h, 0.8), scale(v, 0.2)),
                    _ => v,
                });
            } else {
                self.head_velocity = None;
            }
        }
    }

    /// The dynamic pressure of the gas itself: the probe reads the flow
    /// relative to the moving head, `v_rel = v_gas - v_head`, so add the
    /// head velocity back (the observation's direction is the relative
    /// flow's). Without a head velocity, the probe's own reading.
    fn gas_dynamic_pressure_pa(&self, o: &FlowObservation, dir: [f64; 3]) -> f64 {
        let rho = o.density_kg_per_m3;
        let q = o.dynamic_pressure_pa;
        match self.head_velocity {
            Some(vh) if rho > 0.0 && q > 0.0 && finite3(vh) => {
                let speed = libm::sqrt(2.0 * q / rho);
                let v = add(scale(dir, speed), vh);
                0.5 * rho * dot(v, v)
            }
            _ => q,
        }
    }

    fn repeat(&self, time_s: f64, disp: FrameDisposition) -> Command {
        match self.last {
            Some(mut c) => {
                c.record.frame = disp;
                c
            }
            None => {
                let rec = DecisionRecord {
                    time_s: if time_s.is_finite() { time_s } else { 0.0 },
                    reason: ReasonCode::HoldNoPose,
                    phase: self.state.phase,
                    frame: disp,
                    standoff_m: None,
                    required_standoff_m: self.cfg.decide.required_standoff_m(),
                    section_radius_m: None,
                    centre_offset_m: None,
                    nearest_wall_m: None,
                    throat_diameter_m: None,
                    throat_distance_m: None,
                    upstream_map: None,
                    flow_dir_sigma_rad: 0.0,
                    dynamic_pressure_pa: 0.0,
                    flow_weak_for_s: 0.0,
                    ridge_gradient_per_m: None,
                    speed_limit: SpeedLimit::Stopped,
                    branch: None,
                    stall: None,
                    dead_end: None,
                };
                Command {
                    time_s: rec.time_s,
                    heading_map: self.state.last_heading_map,
                    speed_m_per_s: 0.0,
                    reverse: false,
                    mode: OperatingMode::Hold,
                    record: rec,
                    health: self.flags(),
                }
            }
        }
    }

    /// The previous command with zero speed: the frame's stamp is not
    /// trusted.
    fn hold_untrusted(&self, time_s: f64, disp: FrameDisposition) -> Command {
        let mut c = self.repeat(time_s, disp);
        c.speed_m_per_s = 0.0;
        c.reverse = false;
        c.mode = OperatingMode::Hold;
        c.record.reason = ReasonCode::HoldClockUntrusted;
        c.record.speed_limit = SpeedLimit::Stopped;
        c
    }

    /// Judge a frame's stamp (see [`crate::trust`]). [`Self::step`] does
    /// this itself; a caller that needs the verdict before it prepares the
    /// observation (as [`crate::onboard::FrameNavigator`] does) calls this
    /// once per frame and then [`Self::step_judged`].
    pub fn judge_time(&mut self, raw_time_s: f64) -> ClockVerdict {
        self.clock.judge(raw_time_s)
    }

    /// One step. Never panics; every output number is finite.
    pub fn step(&mut self, obs: &Observation) -> Command {
        let v = self.clock.judge(obs.time_s);
        self.step_judged(obs, v, None)
    }

    /// One step on a frame whose stamp [`Self::judge_time`] has judged
    /// (`verdict` must be that call's answer for `obs.time_s`). The
    /// observation's own `time_s` is not read: the verdict's time is used.
    ///
    /// `window`: the windowed flow estimate ([`crate::flow_window`]) when
    /// the caller found this frame's flow below what one frame resolves
    /// (the probe solver's low-flow guard withheld the direction, or the
    /// dynamic pressure is below `decide.min_dynamic_pressure_pa`);
    /// `None` otherwise, which is what [`Self::step`] passes.
    ///
    /// When the frame's own direction was withheld, the flow channel is
    /// *weak* rather than failed and the window leads: a resolved window
    /// is the fused flow (the robot follows it upstream slowly,
    /// [`ReasonCode::FollowWeakFlow`]); one still integrating stops the
    /// robot where it is ([`ReasonCode::DwellWeakFlow`]); after its
    /// longest dwell the robot moves on by feel while it keeps
    /// integrating. When the frame's direction is valid (only its dynamic
    /// pressure is below the threshold) the frame is fused as usual and
    /// the window only judges whether the flow is lost. Either way the
    /// lost-flow clock runs only while no window has resolved the flow,
    /// and at once when the window bounds it below anything worth
    /// following (still air).
    pub fn step_judged(
        &mut self,
        obs: &Observation,
        verdict: ClockVerdict,
        window: Option<&WindowEstimate>,
    ) -> Command {
        let t = match verdict {
            ClockVerdict::Hold(d) => return self.hold_untrusted(obs.time_s, d),
            ClockVerdict::Late { repeat_ok, .. } => {
                if let Some(w) = &obs.wall {
                    for p in w.wall_points() {
                        let _ = self.map.walls.insert(*p);
                    }
                }
                return if repeat_ok {
                    self.repeat(obs.time_s, FrameDisposition::LateMerged)
                } else {
                    self.hold_untrusted(obs.time_s, FrameDisposition::LateMerged)
                };
            }
            ClockVerdict::Use { time_s, .. } => time_s,
        };
        self.steps = self.steps.saturating_add(1);
        let mut disp = FrameDisposition::Used;
        let dcfg = self.cfg.decide;

        // Pose.
        match obs.pose {
            Some(p) if self.pose_plausible(&p, t) => {
                self.track_head_velocity(p.position_m, t);
                self.pose = Some(p);
                self.good_position_m = Some(p.position_m);
                self.pose_time_s = t;
            }
            Some(_) => disp = FrameDisposition::PartlyRejected,
            None => {}
        }
        if t - self.pose_time_s > self.cfg.pose_timeout_s {
            self.pose = None;
        }
        let forward = self
            .pose
            .as_ref()
            .and_then(head_forward_map)
            .unwrap_or(self.state.last_heading_map);
        if !self.heading_set && self.pose.is_some() {
            // The first heading is where the head points, not a map axis.
            self.state.last_heading_map = forward;
            self.heading_set = true;
        }
        let position = self.pose.map(|p| p.position_m);

        // Flow.
        let flow_dir = obs.flow.as_ref().and_then(flow_dir_ok);
        let window = window.filter(|w| obs.flow.is_some() && window_ok(w));
        // The window leads only when the frame's own direction is
        // withheld; a valid frame below the lost-flow threshold is fused as
        // ever, with the window judging whether the flow is lost.
        let weak = window.filter(|_| flow_dir.is_none());
        if obs.flow.is_some_and(|f| f.velocity_dir_map.is_some()) && flow_dir.is_none() {
            disp = FrameDisposition::PartlyRejected;
        }
        // Wall.
        let wall = match obs.wall {
            Some(w) if section_ok(&w.section) => Some(w),
            Some(mut w) => {
                disp = FrameDisposition::PartlyRejected;
                w.section = Section::Unknown;
                Some(w)
            }
            None => None,
        };

        // Health.
        let rep = HealthReport {
            port_suspect_mask: obs.flow.map_or(0, |f| f.port_suspect_mask),
            port_failed_mask: obs.flow.map_or(0, |f| f.port_failed_mask),
            probe_reported: obs.flow.is_some(),
            flow_valid: match weak {
                Some(w) => w.status == WindowStatus::Resolved,
                None => flow_dir.is_some(),
            },
            flow_degraded: obs.flow.is_some_and(|f| f.degraded),
            flow_weak: weak.is_some(),
            contact_suspect_mask: wall.map_or(0, |w| w.contact_suspect_mask),
            contact_failed_mask: wall.map_or(0, |w| w.contact_failed_mask),
            tactile_reported: wall.is_some(),
            section_lower_bound_only: wall
                .is_some_and(|w| matches!(w.section, Section::LowerBoundOnly { .. })),
        };
        self.health.update(&rep, t);

        // Streamline filter, and the dynamic pressure along the path for
        // the ridge cue (this frame's reading: the fused value lags).
        if let Some(w) = weak {
            self.filter.follow_window(w, t);
        } else if let (Some(o), Some(d)) = (obs.flow.as_ref(), flow_dir) {
            self.filter.update(o, d, t, &self.cfg);
            match window.map(|w| w.status) {
                Some(WindowStatus::Resolved) => self.filter.weak_since_s = None,
                Some(WindowStatus::NoUsableFlow) if self.filter.weak_since_s.is_none() => {
                    self.filter.weak_since_s = Some(t);
                }
                _ => {}
            }
            if let (Some(pos), Some(v)) = (position, self.filter.est.velocity_dir_map) {
                let q = self.gas_dynamic_pressure_pa(o, v);
                self.ridge.add(pos, q, v, &self.cfg.ridge);
            }
        }
        if t - self.filter.last_update_s > self.cfg.health.flow_timeout_s {
            // Stale flow is not evidence of weak flow.
            self.filter.weak_since_s = None;
        }

        // Section memory.
        if let Some(w) = &wall
            && !matches!(w.section, Section::Unknown)
        {
            self.section = w.section;
            self.section_time_s = t;
        }
        if t - self.section_time_s > self.cfg.health.tactile_timeout_s {
            self.section = Section::Unknown;
        }

        // Map upkeep.
        let mut flow_junction = None;
        let retracing = matches!(
            self.state.phase,
            Phase::BackOut { .. } | Phase::GaveUp | Phase::AtSource
        );
        if let Some(pos) = position {
            if !retracing {
                let far = self.map.tip_station().is_none_or(|s| {
                    dist_sq(s.position_m, pos)
                        >= self.cfg.station_spacing_m * self.cfg.station_spacing_m
                });
                if far {
                    self.push_station(t, pos, forward, wall.as_ref());
                    let felt = wall.as_ref().is_some_and(|w| !w.openings().is_empty());
                    if !felt {
                        flow_junction = self.flow_turn_upkeep();
                    }
                }
                if let Some(w) = &wall {
                    self.junction_upkeep(t, pos, forward, w);
                }
            }
            self.gather_evidence(pos, forward, obs.flow.as_ref(), flow_dir);
        }

        let view = HealthView {
            mode: self.health.mode,
            flags: self.flags(),
        };
        let ridge = match (self.filter.est.velocity_dir_map, self.pose.as_ref()) {
            (Some(v), Some(pose)) => crate::map::probe_to_map([0.0, 1.0, 0.0], pose)
                .map(|left| self.ridge.cue(v, left, &self.cfg.ridge)),
            _ => None,
        };
        let perception = Perception {
            time_s: t,
            position_m: position,
            pose_fresh: self.pose.is_some() && self.pose_time_s == t,
            forward_map: forward,
            flow: self.filter.est,
            flow_weak_since_s: self.filter.weak_since_s,
            section: self.section,
            wall: wall.as_ref(),
            ridge,
            frame: disp,
        };
        let mut d: Decision = decide(&self.map, &view, &perception, &self.state, &dcfg);
        let dwell = weak.is_some_and(|w| {
            w.status == WindowStatus::Integrating && !self.filter.window_followable(w, t)
        });
        weak_flow_conduct(&mut d, dwell);
        if let Some(j) = flow_junction.and_then(|id| self.map.junctions.get(id))
            && d.record.branch.is_none()
        {
            let choice = crate::decide::choose_branch(j, j.chosen, &dcfg);
            d.record.branch = Some(crate::decide::branch_record(j, &choice, j.chosen, &dcfg));
        }
        self.apply(&d);
        let mut heading = d.heading_map;
        let mut speed = d.speed_m_per_s;
        if !(finite3(heading) && unit(heading).is_some()) {
            heading = [1.0, 0.0, 0.0];
            speed = 0.0;
        }
        if !(speed.is_finite() && speed >= 0.0) {
            speed = 0.0;
        }
        let cmd = Command {
            time_s: t,
            heading_map: heading,
            speed_m_per_s: speed,
            reverse: d.reverse,
            mode: d.mode,
            record: d.record,
            health: view.flags,
        };
        self.last = Some(cmd);
        cmd
    }

    fn push_station(
        &mut self,
        t: f64,
        pos: [f64; 3],
        forward: [f64; 3],
        wall: Option<&WallObservation>,
    ) -> Option<u32> {
        let st = Station {
            seq: 0,
            time_s: t,
            position_m: pos,
            forward_map: forward,
            section: self.section,
            flow: self.filter.est,
            junction: None,
            prev_seq: None,
        };
        let seq = self.map.push_station(st);
        // Wall points are decimated to one frame per station.
        if let Some(w) = wall {
            for p in w.wall_points() {
                let _ = self.map.walls.insert(*p);
            }
        }
        seq
    }

    fn junction_upkeep(&mut self, t: f64, pos: [f64; 3], forward: [f64; 3], w: &WallObservation) {
        let dcfg = self.cfg.decide;
        let openings = w.openings();
        // Openings measured on a section fit the robot's own body
        // contradicts (a circle narrower than the robot, whose head is
        // inside the conduit) are artefacts of that fit, not branches.
        let contradicted = matches!(w.section, Section::Circle { radius_m, .. }
            if radius_m.is_nan() || radius_m < dcfg.robot_radius_m);
        if openings.is_empty() || contradicted {
            return;
        }
        let merge_cos = libm::cos(0.5 * dcfg.divergence_rad);
        let near = self
            .map
            .junctions
            .near(pos, dcfg.junction_radius_m)
            .map(|j| j.id);
        if let Some(id) = near {
            if let Some(j) = self.map.junctions.get_mut(id) {
                for o in openings {
                    let _ = j.merge_opening(
                        o.direction_map,
                        o.mouth_m,
                        o.clear_width_m,
                        o.width_is_lower_bound,
                        merge_cos,
                    );
                }
            }
            return;
        }
        let upstream = self
            .filter
            .est
            .velocity_dir_map
            .and_then(|v| unit(scale(v, -1.0)));
        let axis = w.conduit_axis_map.and_then(unit).unwrap_or(forward);
        let divergent =
            upstream.is_some_and(|u| libm::fabs(dot(u, axis)) < libm::cos(dcfg.divergence_rad));
        if !(openings.len() >= 2 || divergent) {
            return;
        }
        // Anchor station.
        let Some(seq) = self.push_station(t, pos, forward, None) else {
            return;
        };
        let prev = self.map.stations.by_seq(seq).and_then(|s| s.prev_seq);
        let radius = self.section.usable_radius_m().unwrap_or(0.0);
        let trunk_flux = mass_flux_proxy(
            self.filter.est.density_kg_per_m3,
            self.filter.est.dynamic_pressure_pa,
            core::f64::consts::PI * radius * radius,
        );
        let mut j = Junction::new_at(pos, t, seq, prev);
        j.trunk_upstream_map = upstream.unwrap_or(forward);
        j.trunk_radius_m = radius;
        j.trunk_flux_kg_per_s = trunk_flux;
        j.parent = self.state.in_junction;
        for o in openings {
            let _ = j.merge_opening(
                o.direction_map,
                o.mouth_m,
                o.clear_width_m,
                o.width_is_lower_bound,
                merge_cos,
            );
        }
        if let Some(id) = self.map.junctions.open(j)
            && let Some(st) = self.map.stations.by_seq_mut(seq)
        {
            st.junction = Some(id);
        }
    }

    /// Record a junction seen through the flow when the upstream direction
    /// has turned on the path just travelled ([`crate::flow_turn`]): the
    /// branch followed (entered), and the guessed others. Only while
    /// following, and not within reach of a junction already held.
    fn flow_turn_upkeep(&mut self) -> Option<u16> {
        if !matches!(self.state.phase, Phase::Follow) {
            return None;
        }
        let dcfg = self.cfg.decide;
        let tip = self.map.tip?;
        let turn = crate::flow_turn::find_turn(&self.map.stations, tip, &self.cfg.flow_turn)?;
        // The turn point is the node (every branch's mouth); the anchor the
        // robot backs out to is on the trunk before it, where each branch
        // can be headed for through the node.
        let node = self.map.stations.by_seq(turn.anchor_seq)?.position_m;
        let anchor_seq = crate::flow_turn::station_before(
            &self.map.stations,
            turn.anchor_seq,
            self.cfg.flow_turn.anchor_back_m,
        )?;
        let anchor = *self.map.stations.by_seq(anchor_seq)?;
        if self
            .map
            .junctions
            .near(anchor.position_m, dcfg.junction_radius_m)
            .is_some()
        {
            return None;
        }
        let mut j = Junction::new_at(
            anchor.position_m,
            anchor.time_s,
            anchor.seq,
            anchor.prev_seq,
        );
        j.seen_by_flow = true;
        j.trunk_upstream_map = turn.trunk_upstream_map;
        j.trunk_radius_m = anchor.section.usable_radius_m().unwrap_or(0.0);
        j.parent = self.state.in_junction;
        let followed =
            j.add_unmeasured(turn.branch_upstream_map, node, BranchOrigin::Followed, 1.0)?;
        let apart_cos = libm::cos(dcfg.divergence_rad);
        for g in
            crate::flow_turn::guessed_directions(turn.trunk_upstream_map, turn.branch_upstream_map)
                .into_iter()
                .flatten()
        {
            let _ = j.add_unmeasured(g, node, BranchOrigin::Guessed, apart_cos);
        }
        if let Some(b) = j.branch_mut(followed) {
            b.status = BranchStatus::Entered;
        }
        j.chosen = Some(followed);
        let id = self.map.junctions.open(j)?;
        if let Some(st) = self.map.stations.by_seq_mut(anchor.seq) {
            st.junction = Some(id);
        }
        self.state.in_junction = Some(id);
        Some(id)
    }

    fn gather_evidence(
        &mut self,
        pos: [f64; 3],
        forward: [f64; 3],
        o: Option<&FlowObservation>,
        dir: Option<[f64; 3]>,
    ) {
        let (Some(o), Some(_)) = (o, dir) else {
            return;
        };
        let (jid, b) = match self.state.phase {
            Phase::Sample {
                junction, branch, ..
            }
            | Phase::Enter { junction, branch } => (junction, branch),
            _ => return,
        };
        let dcfg = self.cfg.decide;
        let align = libm::cos(dcfg.sample_align_rad);
        let Some(j) = self.map.junctions.get_mut(jid) else {
            return;
        };
        if dist_sq(j.anchor_position_m, pos) > dcfg.junction_radius_m * dcfg.junction_radius_m {
            return;
        }
        if let Some(br) = j.branch_mut(b)
            && dot(br.direction_map, forward) >= align
        {
            let flux = mass_flux_proxy(
                o.density_kg_per_m3,
                o.dynamic_pressure_pa,
                disc_area_m2(br.clear_width_m),
            );
            br.evidence.add(flux);
        }
    }

    fn apply(&mut self, d: &Decision) {
        self.state = d.next;
        if let Some(v) = &d.verdict {
            if let Some(j) = self.map.junctions.get_mut(v.junction) {
                j.chosen = v.chosen;
                let n = usize::from(v.count.min(j.branch_count));
                for (b, s) in j.branches.iter_mut().zip(v.status.iter()).take(n) {
                    b.status = *s;
                }
            }
            if let Some(tip) = v.set_tip {
                self.map.tip = Some(tip);
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn window(status: WindowStatus) -> WindowEstimate {
        WindowEstimate {
            status,
            velocity_dir_map: Some([-1.0, 0.0, 0.0]),
            ..WindowEstimate::EMPTY
        }
    }

    /// A window that lost its resolution is still followed for
    /// `WEAK_FOLLOW_GRACE_S`, and no longer after; still air is never
    /// followed. The time runs from the last resolved frame.
    #[test]
    fn weak_flow_is_followed_through_short_losses_of_resolution() {
        let mut f = FlowFilter::NEW;
        assert!(!f.window_followable(&window(WindowStatus::Integrating), 0.0));
        f.follow_window(&window(WindowStatus::Resolved), 10.0);
        assert!(f.est.velocity_dir_map.is_some());
        let lost = window(WindowStatus::Integrating);
        f.follow_window(&lost, 10.0 + WEAK_FOLLOW_GRACE_S - 0.01);
        assert!(f.est.velocity_dir_map.is_some(), "dropped within the grace");
        f.follow_window(&lost, 10.0 + WEAK_FOLLOW_GRACE_S + 0.01);
        assert!(f.est.velocity_dir_map.is_none(), "followed past the grace");
        f.follow_window(&window(WindowStatus::Resolved), 20.0);
        assert!(!f.window_followable(&window(WindowStatus::NoUsableFlow), 20.01));
    }
}
