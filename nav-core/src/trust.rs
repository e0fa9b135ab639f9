//! Which frame time stamps and head poses the navigator trusts.
//!
//! The navigator has no clock of its own: every time-dependent rule (pose
//! and channel timeouts, filters, hysteresis) runs on the frames' stamps.
//! A stamp that cannot be trusted (not finite, far ahead of the last one,
//! behind it, or not moving) must therefore never keep the robot moving.
//! [`FrameClock`] judges each stamp before any stage uses the frame:
//!
//! - a finite stamp after the last used one, by at most
//!   [`ClockConfig::max_forward_jump_s`], is used;
//! - a stamp not after the last used one but within the reorder window is
//!   *late* (its wall points may be merged); the previous command may be
//!   repeated for at most [`ClockConfig::max_late_frames`] consecutive
//!   frames, then the robot holds;
//! - anything else (not finite, older than the reorder window, or a jump
//!   forward beyond the limit) holds at once: zero speed, the disposition
//!   in the record.
//!
//! **Recovery.** Frames that are not used but whose own stamps advance
//! steadily (each step in `(0, max_step_s]`) are a clock that was reset or
//! jumped. After [`ClockConfig::reanchor_frames`] of them in a row, the
//! navigator re-anchors: from then on a stamp `t` is read as `t + offset`,
//! with the offset chosen so that the new clock continues from the last
//! used time by its own last step. So after a reset to zero or a jump
//! either way, the robot holds for at most `reanchor_frames - 1` frames
//! (9 frames, 0.09 s at 100 Hz, with the defaults) and then uses frames
//! again. A clock that does not advance (stuck) or runs backwards never
//! re-anchors: the robot holds until the stamps advance past the last used
//! one again.
//!
//! Bounded: with these rules, at most `max_late_frames` commands with a
//! non-zero speed follow the last used frame, whatever the stamps.
//!
//! **Poses.** A finite pose may still be absurd. [`PoseLimits`] refuses a
//! pose whose position lies further than `max_abs_position_m` from the map
//! origin, whose sigmas are negative or larger than their limits, or that
//! moved further from the last accepted pose than `max_speed_m_per_s`
//! times the time between them plus `jump_slack_m`. The allowance grows
//! with the time since the last accepted pose, so odometry that really
//! re-localised is accepted again after a bounded time (a 10 m jump after
//! (10 - 0.5) / 3 = 3.2 s with the defaults); the robot holds for lack of
//! a pose meanwhile.

use crate::decide::FrameDisposition;
use crate::frame::HeadPose;

/// Limits on a plausible head pose.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PoseLimits {
    /// Largest |coordinate| of the head position, m.
    pub max_abs_position_m: f64,
    /// Largest position sigma, m.
    pub max_position_sigma_m: f64,
    /// Largest attitude sigma, rad.
    pub max_attitude_sigma_rad: f64,
    /// Fastest the head can move between two accepted poses, m/s.
    pub max_speed_m_per_s: f64,
    /// Jump allowed on top of the speed limit (odometry noise), m.
    pub jump_slack_m: f64,
}

impl PoseLimits {
    /// Defaults for the crawlers this core is for (cruise 0.3 m/s): a
    /// 1000 km map, 1 km and pi rad sigmas, 3 m/s, 0.5 m slack (common
    /// practice margins, not from a published source).
    pub const DEFAULT: Self = Self {
        max_abs_position_m: 1.0e6,
        max_position_sigma_m: 1.0e3,
        max_attitude_sigma_rad: core::f64::consts::PI,
        max_speed_m_per_s: 3.0,
        jump_slack_m: 0.5,
    };

    /// Whether every field is in range.
    #[must_use]
    pub fn is_valid(&self) -> bool {
        [
            self.max_abs_position_m,
            self.max_position_sigma_m,
            self.max_attitude_sigma_rad,
            self.max_speed_m_per_s,
        ]
        .iter()
        .all(|v| v.is_finite() && *v > 0.0)
            && self.jump_slack_m.is_finite()
            && self.jump_slack_m >= 0.0
    }

    /// Whether `pose` at time `t` is plausible, given the position of the
    /// last accepted pose and its time (`last`). Non-finite values are
    /// never plausible.
    #[must_use]
    pub fn plausible(&self, pose: &HeadPose, t: f64, last: Option<([f64; 3], f64)>) -> bool {
        let p = pose.position_m;
        let q = pose.orientation_wxyz;
        let n2 = q[0] * q[0] + q[1] * q[1] + q[2] * q[2] + q[3] * q[3];
        let finite = p.iter().chain(q.iter()).all(|v| v.is_finite());
        if !(finite && n2 > 1e-12 && n2.is_finite()) {
            return false;
        }
        if p.iter().any(|v| v.abs() > self.max_abs_position_m) {
            return false;
        }
        let s = pose.position_sigma_m;
        let a = pose.attitude_sigma_rad;
        if !(s >= 0.0
            && s <= self.max_position_sigma_m
            && a >= 0.0
            && a <= self.max_attitude_sigma_rad)
        {
            return false;
        }
        match last {
            Some((l, t0)) => {
                let dt = t - t0;
                let d = [p[0] - l[0], p[1] - l[1], p[2] - l[2]];
                let dist = libm::sqrt(d[0] * d[0] + d[1] * d[1] + d[2] * d[2]);
                let allowed = self.jump_slack_m + self.max_speed_m_per_s * dt.max(0.0);
                dt.is_finite() && dist <= allowed
            }
            None => true,
        }
    }
}

impl Default for PoseLimits {
    fn default() -> Self {
        Self::DEFAULT
    }
}

/// How stamps are judged.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ClockConfig {
    /// Consecutive late frames (within the reorder window) for which the
    /// previous command may be repeated; the next ones hold.
    pub max_late_frames: u32,
    /// A stamp further than this after the last used one is not trusted
    /// until confirmed by `reanchor_frames` steady frames, s.
    pub max_forward_jump_s: f64,
    /// Steady frames of a new clock that re-anchor the navigator's time
    /// (>= 2).
    pub reanchor_frames: u32,
    /// Largest step between two frames of a steady new clock, s.
    pub max_step_s: f64,
}

impl ClockConfig {
    /// Defaults for a frame rate of about 100 Hz: 5 late frames (0.05 s),
    /// a 5 s forward jump, 10 frames to re-anchor, 0.2 s steps (common
    /// practice for a sensor bus at this rate, not from a published
    /// source).
    pub const DEFAULT: Self = Self {
        max_late_frames: 5,
        max_forward_jump_s: 5.0,
        reanchor_frames: 10,
        max_step_s: 0.2,
    };

    /// Whether every field is in range.
    #[must_use]
    pub fn is_valid(&self) -> bool {
        self.max_forward_jump_s.is_finite()
            && self.max_forward_jump_s > 0.0
            && self.max_step_s.is_finite()
            && self.max_step_s > 0.0
            && self.reanchor_frames >= 2
            && self.reanchor_frames <= 100_000
            && self.max_late_frames <= 100_000
    }
}

impl Default for ClockConfig {
    fn default() -> Self {
        Self::DEFAULT
    }
}

/// The judgement on one frame's stamp.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum ClockVerdict {
    /// Use the frame, at this navigator time, s.
    Use {
        /// Navigator time of the frame, s.
        time_s: f64,
        /// The clock was re-anchored on this frame.
        reanchored: bool,
    },
    /// Late, within the reorder window.
    Late {
        /// Navigator time of the frame, s.
        time_s: f64,
        /// The previous command may still be repeated.
        repeat_ok: bool,
    },
    /// Not trusted: hold.
    Hold(FrameDisposition),
}

/// The stamp judge. See the module doc.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FrameClock {
    cfg: ClockConfig,
    reorder_window_s: f64,
    offset_s: f64,
    last_s: f64,
    used_any: bool,
    unused_run: u32,
    held: bool,
    run_last_raw_s: f64,
    run_step_s: f64,
    run_len: u32,
    reanchors: u32,
}

impl FrameClock {
    /// A clock that has seen no frame.
    #[must_use]
    pub const fn new(cfg: ClockConfig, reorder_window_s: f64) -> Self {
        Self {
            cfg,
            reorder_window_s,
            offset_s: 0.0,
            last_s: f64::NEG_INFINITY,
            used_any: false,
            unused_run: 0,
            held: false,
            run_last_raw_s: f64::NEG_INFINITY,
            run_step_s: 0.0,
            run_len: 0,
            reanchors: 0,
        }
    }

    /// Offset added to raw stamps, s (0 until a re-anchor).
    #[must_use]
    pub const fn offset_s(&self) -> f64 {
        self.offset_s
    }

    /// Navigator time of the last used frame, s.
    #[must_use]
    pub const fn last_used_s(&self) -> f64 {
        self.last_s
    }

    /// Re-anchors so far.
    #[must_use]
    pub const fn reanchors(&self) -> u32 {
        self.reanchors
    }

    /// What the navigator time of a raw stamp would be (no judgement).
    #[must_use]
    pub fn navigator_time_s(&self, raw_s: f64) -> f64 {
        raw_s + self.offset_s
    }

    /// Judge one frame's stamp (and remember it).
    pub fn judge(&mut self, raw_s: f64) -> ClockVerdict {
        let t = raw_s + self.offset_s;
        if !(raw_s.is_finite() && t.is_finite()) {
            return self.hold(FrameDisposition::DroppedInvalid);
        }
        if !self.used_any {
            return self.use_at(t, false);
        }
        if t > self.last_s && t - self.last_s <= self.cfg.max_forward_jump_s {
            return self.use_at(t, false);
        }
        // Not a plain next frame: is it part of a steady new clock?
        if self.extend_run(raw_s) {
            let t = self.last_s + self.run_step_s;
            self.offset_s = t - raw_s;
            self.reanchors = self.reanchors.saturating_add(1);
            return self.use_at(t, true);
        }
        if t > self.last_s {
            return self.hold(FrameDisposition::DroppedClockJump);
        }
        if self.last_s - t <= self.reorder_window_s {
            self.unused_run = self.unused_run.saturating_add(1);
            return ClockVerdict::Late {
                time_s: t,
                repeat_ok: !self.held && self.unused_run <= self.cfg.max_late_frames,
            };
        }
        self.hold(FrameDisposition::DroppedStale)
    }

    fn extend_run(&mut self, raw_s: f64) -> bool {
        let step = raw_s - self.run_last_raw_s;
        if self.run_len > 0 && step > 0.0 && step <= self.cfg.max_step_s {
            self.run_len = self.run_len.saturating_add(1);
            self.run_step_s = step;
        } else {
            self.run_len = 1;
        }
        self.run_last_raw_s = raw_s;
        self.run_len >= self.cfg.reanchor_frames
    }

    fn use_at(&mut self, t: f64, reanchored: bool) -> ClockVerdict {
        self.last_s = t;
        self.used_any = true;
        self.unused_run = 0;
        self.held = false;
        self.run_len = 0;
        ClockVerdict::Use {
            time_s: t,
            reanchored,
        }
    }

    fn hold(&mut self, d: FrameDisposition) -> ClockVerdict {
        self.unused_run = self.unused_run.saturating_add(1);
        self.held = true;
        ClockVerdict::Hold(d)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn clock() -> FrameClock {
        FrameClock::new(ClockConfig::DEFAULT, 0.2)
    }

    fn used(v: ClockVerdict) -> Option<f64> {
        match v {
            ClockVerdict::Use { time_s, .. } => Some(time_s),
            _ => None,
        }
    }

    #[test]
    fn steady_stamps_are_used_unchanged() {
        let mut c = clock();
        for i in 0..50u32 {
            let t = f64::from(i) * 0.01;
            assert_eq!(used(c.judge(t)), Some(t));
        }
        assert_eq!(c.offset_s(), 0.0);
    }

    #[test]
    fn nan_and_infinite_stamps_hold() {
        let mut c = clock();
        c.judge(1.0);
        for raw in [f64::NAN, f64::INFINITY, f64::NEG_INFINITY] {
            assert_eq!(
                c.judge(raw),
                ClockVerdict::Hold(FrameDisposition::DroppedInvalid)
            );
        }
        // A late frame after a hold does not repeat the old command.
        assert_eq!(
            c.judge(0.95),
            ClockVerdict::Late {
                time_s: 0.95,
                repeat_ok: false
            }
        );
        assert_eq!(used(c.judge(1.01)), Some(1.01));
    }

    #[test]
    fn one_future_stamp_is_held_and_the_old_clock_goes_on() {
        let mut c = clock();
        for i in 0..10u32 {
            c.judge(10.0 + f64::from(i) * 0.01);
        }
        assert_eq!(
            c.judge(1e9),
            ClockVerdict::Hold(FrameDisposition::DroppedClockJump)
        );
        assert_eq!(used(c.judge(10.10)), Some(10.10));
        assert_eq!(c.reanchors(), 0);
    }

    #[test]
    fn a_reset_to_zero_reanchors_after_the_documented_frames() {
        let mut c = clock();
        for i in 0..=100u32 {
            c.judge(f64::from(i) * 0.01);
        }
        let last = c.last_used_s();
        let mut held = 0;
        let mut first_use = None;
        for i in 0..20u32 {
            match c.judge(f64::from(i) * 0.01) {
                ClockVerdict::Hold(_) => held += 1,
                ClockVerdict::Use { time_s, reanchored } => {
                    first_use.get_or_insert((i, time_s, reanchored));
                }
                ClockVerdict::Late { .. } => panic!("a reset frame is not late"),
            }
        }
        assert_eq!(held, ClockConfig::DEFAULT.reanchor_frames - 1);
        let (i, t, re) = first_use.expect("re-anchored");
        assert_eq!(i, ClockConfig::DEFAULT.reanchor_frames - 1);
        assert!(re);
        assert!((t - (last + 0.01)).abs() < 1e-9, "{t} after {last}");
        assert!(c.offset_s() > 0.9);
    }

    #[test]
    fn a_stuck_clock_repeats_a_few_frames_then_holds_until_it_moves() {
        let mut c = clock();
        c.judge(5.0);
        let mut repeats = 0;
        for _ in 0..100 {
            match c.judge(5.0) {
                ClockVerdict::Late {
                    repeat_ok: true, ..
                } => repeats += 1,
                ClockVerdict::Late {
                    repeat_ok: false, ..
                } => {}
                v => panic!("{v:?}"),
            }
        }
        assert_eq!(repeats, ClockConfig::DEFAULT.max_late_frames);
        assert_eq!(c.reanchors(), 0);
        assert_eq!(used(c.judge(5.01)), Some(5.01));
    }

    #[test]
    fn a_forward_jump_that_goes_on_steadily_reanchors() {
        let mut c = clock();
        c.judge(1.0);
        let mut uses = 0;
        for i in 0..10u32 {
            if used(c.judge(1000.0 + f64::from(i) * 0.01)).is_some() {
                uses += 1;
            }
        }
        assert_eq!(uses, 1);
        assert!((c.last_used_s() - 1.01).abs() < 1e-9);
    }

    #[test]
    fn a_clock_running_backwards_never_reanchors() {
        let mut c = clock();
        c.judge(100.0);
        for i in 0..1000u32 {
            let v = c.judge(99.0 - f64::from(i) * 0.01);
            assert!(matches!(v, ClockVerdict::Hold(_)), "{v:?}");
        }
    }

    fn pose(x: f64) -> HeadPose {
        HeadPose {
            position_m: [x, 0.0, 0.0],
            orientation_wxyz: [1.0, 0.0, 0.0, 0.0],
            position_sigma_m: 0.01,
            attitude_sigma_rad: 0.01,
        }
    }

    #[test]
    fn absurd_poses_are_refused_and_ordinary_ones_kept() {
        let l = PoseLimits::DEFAULT;
        assert!(l.plausible(&pose(3.0), 0.0, None));
        assert!(!l.plausible(&pose(1e125), 0.0, None));
        assert!(!l.plausible(&pose(-2e6), 0.0, None));
        let mut neg = pose(0.0);
        neg.position_sigma_m = -0.1;
        assert!(!l.plausible(&neg, 0.0, None));
        let mut neg = pose(0.0);
        neg.attitude_sigma_rad = -1e-9;
        assert!(!l.plausible(&neg, 0.0, None));
        let mut big = pose(0.0);
        big.position_sigma_m = 1e300;
        assert!(!l.plausible(&big, 0.0, None));
        let mut nan = pose(0.0);
        nan.orientation_wxyz[2] = f64::NAN;
        assert!(!l.plausible(&nan, 0.0, None));
        let last = pose(0.0);
        // 0.01 s later: 0.5 m + 3 m/s * 0.01 s = 0.53 m allowed.
        assert!(l.plausible(&pose(0.52), 0.01, Some((last.position_m, 0.0))));
        assert!(!l.plausible(&pose(0.54), 0.01, Some((last.position_m, 0.0))));
        // A kilometre in one step is refused; after long enough it is not.
        assert!(!l.plausible(&pose(1000.0), 0.01, Some((last.position_m, 0.0))));
        assert!(l.plausible(&pose(1000.0), 400.0, Some((last.position_m, 0.0))));
    }

    #[test]
    fn defaults_are_valid_and_bad_fields_are_not() {
        assert!(PoseLimits::DEFAULT.is_valid());
        assert!(
            !PoseLimits {
                jump_slack_m: -1.0,
                ..PoseLimits::DEFAULT
            }
            .is_valid()
        );
        assert!(ClockConfig::DEFAULT.is_valid());
        let bad = [
            ClockConfig {
                reanchor_frames: 1,
                ..ClockConfig::DEFAULT
            },
            ClockConfig {
                max_step_s: 0.0,
                ..ClockConfig::DEFAULT
            },
            ClockConfig {
                max_forward_jump_s: f64::NAN,
                ..ClockConfig::DEFAULT
            },
        ];
        for b in bad {
            assert!(!b.is_valid(), "{b:?}");
        }
    }
}
