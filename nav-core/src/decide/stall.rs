//! Stall: the head is not advancing as commanded. Each step adds the
//! distance the last command asked for (its speed over the time since); a
//! window closes once it has lasted [`DecideConfig::stall_window_s`] at the
//! commanded speed (twice the sensing latency plus the time to command
//! `stall_distance_m`) and has commanded at least `stall_distance_m`. The
//! window is a stall when the odometry shows less than `stall_fraction` of
//! what was commanded, less the part the sensing latency still hides
//! (`latency * speed`). A window opens afresh whenever the robot was told
//! to stop, turned from forward to reverse or back, or its pose was not
//! reported that frame (a held-over pose shows no progress), so a
//! stall always belongs to one direction of travel.
//!
//! What the skin felt when the window closed types the stall
//! ([`StallLoad`]): with the nose loaded it is an obstruction ahead, and
//! ends the way; with nothing felt ahead it ends the way only when a
//! junction is behind to back out to (`back_out.rs`), and is otherwise
//! recorded while the robot creeps on.
//! Checked by `tests/tests/nav_walls.rs`.

use crate::map::dist_sq;

use super::config::DecideConfig;
use super::record::{Perception, StallLoad, StallRecord, StallWatch};

/// Longest gap between decisions over which commanded distance is still
/// integrated, s; a longer gap (dropped frames) restarts the window.
const MAX_GAP_S: f64 = 0.5;

/// The watch after this step's pose and time, before this step's command.
pub(super) fn observe(prev: &StallWatch, p: &Perception<'_>, cfg: &DecideConfig) -> StallWatch {
    let mut w = *prev;
    let t = p.time_s;
    let dt = t - w.last_time_s;
    w.last_time_s = t;
    // A pose held over a dropout shows no progress: no judgement on it.
    let Some(pos) = p.position_m.filter(|_| p.pose_fresh) else {
        w.since_s = None;
        w.stalled = None;
        return w;
    };
    let moving = w.last_speed_m_per_s > 0.0;
    let Some(since) = w.since_s.filter(|_| moving && dt > 0.0 && dt <= MAX_GAP_S) else {
        w.since_s = Some(t);
        w.from_m = pos;
        w.commanded_m = 0.0;
        w.stalled = None;
        return w;
    };
    let v = w.last_speed_m_per_s;
    w.commanded_m += v * dt;
    if t - since >= cfg.stall_window_s(v) && w.commanded_m >= cfg.stall_distance_m {
        let hidden = cfg.sensing_latency_s * v;
        let expected = if w.commanded_m > hidden {
            w.commanded_m - hidden
        } else {
            0.0
        };
        let advanced = libm::sqrt(dist_sq(pos, w.from_m));
        w.stalled = (advanced < cfg.stall_fraction * expected).then(|| StallRecord {
            load: load(p),
            window_s: t - since,
            expected_m: expected,
            advanced_m: advanced,
        });
        w.since_s = Some(t);
        w.from_m = pos;
        w.commanded_m = 0.0;
    }
    w
}

fn load(p: &Perception<'_>) -> StallLoad {
    match p.wall {
        Some(w) if w.nose_loaded => StallLoad::NoseLoaded,
        Some(w) if w.wall_point_count > 0 => StallLoad::SidesOnly,
        _ => StallLoad::Unfelt,
    }
}

/// The watch to carry on, given this step's command: a stop or a change of
/// direction closes the window unjudged.
pub(super) fn after(mut w: StallWatch, speed_m_per_s: f64, reverse: bool) -> StallWatch {
    let moving = speed_m_per_s > 0.0;
    if !moving || reverse != w.last_reverse {
        w.since_s = None;
    }
    w.last_speed_m_per_s = if moving { speed_m_per_s } else { 0.0 };
    w.last_reverse = reverse;
    w
}
