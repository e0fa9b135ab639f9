//! Decisions: follow the streamline upstream, choose a branch, back out,
//! hold. [`decide`] is a pure function of the map, the health view, the
//! current perception, the decision memory (phase) and the configuration;
//! it returns the command, the record of why, the next phase and the
//! junction verdict for the caller to write into the map.
//!
//! Data flows one way: the navigator's perception stages build the
//! [`FlowObservation`] / [`WallObservation`] and the map; this module reads
//! them and never calls back into perception. The map is written only by
//! the caller, from the [`Verdict`] a decision returns.
//!
//! ## Rooms
//! [`decide`] is a dispatcher; each behaviour lives in its own file:
//!
//! | file | behaviour |
//! |---|---|
//! | `hold.rs` | holds that take precedence: no pose, channels unhealthy, given up, at the source, no safe standoff while squeezed |
//! | `back_out.rs` | dead-end triggers and the retrace to the junction |
//! | `branch.rs` | junction sampling, branch choice with hysteresis, entering |
//! | `follow.rs` | following upstream, or by feel without flow |
//! | `standoff.rs` | clearances and `steer`: centring, wall push, speed limits |
//! | `observe.rs`, `record.rs`, `config.rs` | inputs, outputs and thresholds |
//!
//! The order of the dispatch is the order of precedence: hold, then a
//! back-out in progress, then the back-out triggers, then the junction
//! behaviours, then follow.
//!
//! ## Rules, and the tests that check them
//! - **Follow.** Heading = upstream (opposite the fused velocity direction)
//!   plus a centring term `gain * offset / radius` toward the cross-section
//!   centre (perpendicular part only, magnitude capped at 1), plus a push
//!   away from the nearest wall point when it is closer than the required
//!   standoff `robot_radius + standoff_margin`. Without flow (tactile-only
//!   mode) the heading is the conduit axis signed along the last heading;
//!   without tactile data (flow-only mode) speed is capped at creep.
//!   Checked by `tests/tests/onboard.rs`
//!   (`heading_points_upstream_once_the_filter_settles`,
//!   `brushing_contacts_give_the_conduit_radius_and_a_recentring_heading`),
//!   `tests/tests/nav_props.rs` (`arbitrary_finite_inputs_give_finite_commands`,
//!   `rigid_motion_leaves_decisions_unchanged`) and
//!   `tests/tests/nav_free_space.rs`
//!   (`a_wall_ahead_beside_the_flow_is_steered_round_not_a_stop`).
//! - **Speed limits / standoff.** Speed ramps from creep to cruise as the
//!   standoff excess goes from 0 to `slow_band_m`, and is capped near
//!   throats (linear in distance over `throat_lookahead_m`), near junctions,
//!   by mode, and at the feel speed when no clearance is known. Checked by
//!   `nav_free_space.rs` (`a_quiet_skin_is_healthy_and_caps_speed_at_the_feel_speed`,
//!   `with_the_flow_failed_and_nothing_felt_it_creeps`) and the closed-loop
//!   strike-free runs in `tests/tests/closed_loop.rs`.
//! - **Branch.** At an unresolved junction each eligible branch is sampled
//!   in turn (the robot stops and points its head into the branch; the
//!   caller adds one mass-flux sample per aligned frame), then
//!   [`choose_branch`] picks the strongest eligible branch. A switch away
//!   from the incumbent needs the challenger to exceed it by the hysteresis
//!   fraction. A branch narrower than `2 robot_radius + width_margin` is
//!   never chosen, whatever its flow. Continuity (sum of branch fluxes
//!   against the trunk flux) is recorded; when it fails, under-sampled
//!   branches get a second round. Checked by `nav_props.rs`
//!   (`narrow_branch_never_chosen`, `more_flow_for_the_chosen_branch_keeps_it`,
//!   `no_flip_inside_the_band`, `noise_inside_the_hysteresis_band_never_makes_it_switch`,
//!   `avoids_the_too_narrow_strongest_branch_and_reaches_the_source`).
//! - **Back out.** A wall across the path, flow lost for `lost_flow_s`, or
//!   a throat ahead narrower than `2 robot_radius + width_margin` marks the
//!   entered branch a dead end, and the robot retraces its stations
//!   (following their `prev_seq` links) to the junction anchor, then
//!   enters the next-best branch. A junction with nothing left passes the
//!   failure to its parent; with no parent the navigator gives up and
//!   holds. Checked by `nav_props.rs`
//!   (`backs_out_of_a_dead_end_and_takes_the_next_best_branch`,
//!   `gives_up_cleanly_when_every_branch_is_a_dead_end`) and
//!   `nav_free_space.rs` (`a_wall_ahead_in_still_air_is_a_dead_end`).
//! - **Hold.** Every hold stops with the head where it points and names its
//!   reason ([`ReasonCode`]). Checked by `nav_props.rs`
//!   (`holds_when_both_channels_go_silent`) and `nav_free_space.rs`
//!   (`a_wall_ahead_with_the_flow_coming_out_of_it_is_held_as_arrived`).
//! - **Purity.** Same inputs, same decision, bit for bit: the determinism
//!   digests and golden traces (`tests/tests/determinism.rs`,
//!   `tests/tests/golden.rs`, `nav_props.rs` `same_inputs_same_outputs_bit_for_bit`).

use core::ops::ControlFlow;

use crate::health::OperatingMode;
use crate::map::{LocalMap, dot, finite3, norm, scale, unit};

mod back_out;
mod branch;
mod config;
mod follow;
mod hold;
mod observe;
mod record;
mod stall;
mod standoff;

pub use crate::map::{head_forward_map, probe_to_map};
pub(crate) use branch::branch_record;
pub use branch::{BranchChoice, choose_branch};
pub use config::DecideConfig;
pub use observe::{
    FlowObservation, MAX_FRAME_WALL_POINTS, Opening, SOURCE_AHEAD_COS, Throat, WALL_BESIDE_M,
    WallObservation, mat3_to_arr, probe_cov_to_map,
};
pub use record::{
    BackOutCause, BranchRecord, DeadEndRecord, DecideState, Decision, DecisionRecord,
    FrameDisposition, HealthFlags, HealthView, Perception, Phase, ReasonCode, SpeedLimit,
    StallLoad, StallRecord, StallWatch, Verdict,
};

/// What every room reads of this step: the inputs and the few quantities
/// derived from them once.
pub(super) struct Step<'a, 'p> {
    health: &'a HealthView,
    p: &'a Perception<'p>,
    state: &'a DecideState,
    cfg: &'a DecideConfig,
    /// Required standoff, m.
    required: f64,
    /// Last commanded heading (unit; +x when unusable).
    last: [f64; 3],
    /// Fused upstream direction, unit, map frame.
    upstream: Option<[f64; 3]>,
    /// The flow can be steered on (not tactile-only, a direction known).
    flow_usable: bool,
    /// The heading a hold keeps (the head's forward axis once posed).
    hold_heading: [f64; 3],
    /// Conduit axis signed along the last heading.
    axis: Option<[f64; 3]>,
    /// Direction along the conduit for clearance geometry.
    along: [f64; 3],
    /// Stall found by the progress watch this step.
    stalled: Option<StallRecord>,
    /// A junction is behind to back out to ([`back_out::junction_behind`]).
    junction_behind: bool,
    /// ... and it was felt, not only seen through the flow.
    felt_junction_behind: bool,
    /// The radius of a credible section narrower than the required
    /// standoff while the skin is squeezed, m ([`hold::squeezed_narrow_m`]).
    squeezed_narrow_m: Option<f64>,
}

impl<'a, 'p> Step<'a, 'p> {
    fn new(
        health: &'a HealthView,
        p: &'a Perception<'p>,
        state: &'a DecideState,
        cfg: &'a DecideConfig,
        stalled: Option<StallRecord>,
        behind: Option<bool>,
    ) -> Self {
        let last = unit(state.last_heading_map).unwrap_or([1.0, 0.0, 0.0]);
        let upstream = p.flow.velocity_dir_map.and_then(|v| unit(scale(v, -1.0)));
        let flow_usable = health.mode != OperatingMode::TactileOnly && upstream.is_some();
        let hold_heading = if p.position_m.is_some() {
            unit(p.forward_map).unwrap_or(last)
        } else {
            last
        };
        let axis = p
            .wall
            .and_then(|w| w.conduit_axis_map)
            .and_then(unit)
            .map(|a| {
                if dot(a, last) < 0.0 {
                    scale(a, -1.0)
                } else {
                    a
                }
            });
        let along = if flow_usable {
            upstream.unwrap_or(last)
        } else {
            axis.unwrap_or(last)
        };
        let required = cfg.required_standoff_m();
        let squeezed_narrow_m = p
            .position_m
            .and_then(|pos| hold::squeezed_narrow_m(p, pos, along, cfg.robot_radius_m, required));
        Self {
            health,
            p,
            state,
            cfg,
            required,
            last,
            upstream,
            flow_usable,
            hold_heading,
            axis,
            along,
            stalled,
            junction_behind: behind.is_some(),
            felt_junction_behind: behind == Some(true),
            squeezed_narrow_m,
        }
    }

    /// The record before any behaviour has spoken.
    fn record(&self) -> DecisionRecord {
        let p = self.p;
        DecisionRecord {
            time_s: p.time_s,
            reason: ReasonCode::FollowUpstream,
            phase: self.state.phase,
            frame: p.frame,
            standoff_m: None,
            required_standoff_m: self.required,
            section_radius_m: None,
            centre_offset_m: None,
            nearest_wall_m: None,
            throat_diameter_m: p
                .wall
                .and_then(|w| w.throat.map(|t| t.min_clear_diameter_m)),
            throat_distance_m: p.wall.and_then(|w| w.throat.map(|t| t.distance_ahead_m)),
            upstream_map: self.upstream,
            flow_dir_sigma_rad: libm::sqrt(libm::fabs(p.flow.dir_var_rad2())),
            dynamic_pressure_pa: p.flow.dynamic_pressure_pa,
            flow_weak_for_s: p.flow_weak_since_s.map_or(0.0, |t| p.time_s - t),
            ridge_gradient_per_m: None,
            speed_limit: SpeedLimit::Stopped,
            branch: None,
            stall: self.stalled,
            dead_end: None,
        }
    }
}

/// The decision for one step. Pure: same inputs, same output, bit for bit.
#[must_use]
pub fn decide<const S: usize, const W: usize, const JN: usize>(
    map: &LocalMap<S, W, JN>,
    health: &HealthView,
    p: &Perception<'_>,
    state: &DecideState,
    cfg: &DecideConfig,
) -> Decision {
    let watch = stall::observe(&state.stall, p, cfg);
    let behind = back_out::junction_behind(map, state);
    let cx = Step::new(health, p, state, cfg, watch.stalled, behind);
    let mut d = dispatch(map, &cx);
    d.next.stall = stall::after(watch, d.speed_m_per_s, d.reverse);
    d
}

/// The behaviours in order of precedence.
fn dispatch<const S: usize, const W: usize, const JN: usize>(
    map: &LocalMap<S, W, JN>,
    cx: &Step<'_, '_>,
) -> Decision {
    let (p, state, cfg, health) = (cx.p, cx.state, cx.cfg, cx.health);
    let mut rec = cx.record();
    let Some(pos) = p.position_m else {
        return hold::hold(cx.hold_heading, rec, ReasonCode::HoldNoPose, *state);
    };
    let cl = standoff::clearance(map, pos, cx.along, &p.section, p.wall, cfg.robot_radius_m);
    rec.standoff_m = cl.standoff_m;
    rec.section_radius_m = cl.section_radius_m;
    rec.centre_offset_m = cl.centre_offset_m;
    rec.nearest_wall_m = cl.nearest_wall_m;

    if let ControlFlow::Break(d) = hold::must_hold(cx, rec) {
        return d;
    }
    if let Phase::BackOut {
        junction,
        cursor_seq,
        cause,
    } = state.phase
    {
        if cx.stalled.is_some() {
            return back_out::stalled_on_the_way_back(
                map,
                p,
                pos,
                junction,
                cause,
                rec,
                state,
                cfg,
                health,
                cx.hold_heading,
            );
        }
        return back_out::back_out_step(
            map, p, pos, junction, cursor_seq, cause, rec, state, cfg, health,
        );
    }
    if let ControlFlow::Break(d) = back_out::trigger(map, cx, pos, rec) {
        return d;
    }
    match branch::junction_step(map, cx, pos, &cl, rec) {
        ControlFlow::Break(d) => d,
        ControlFlow::Continue(next) => {
            let detour = branch::dead_branch_detour(map, &next, pos, cx.upstream, cfg);
            follow::follow_step(cx, pos, &cl, rec, next, detour)
        }
    }
}

/// Sanity for callers: a heading is a finite unit vector.
#[must_use]
pub fn is_unit_heading(h: [f64; 3]) -> bool {
    finite3(h) && libm::fabs(norm(h) - 1.0) < 1e-9
}
