//! Junction and branch choice: sample each eligible branch's flow, choose
//! the strongest eligible one (with hysteresis against the incumbent),
//! enter it; record the comparison and why each other branch was
//! rejected.

use core::ops::ControlFlow;

use crate::map::{
    BranchOrigin, BranchStatus, Junction, LocalMap, MAX_BRANCHES, RejectReason, add, dist_sq, dot,
    scale, sub, unit,
};

use super::Step;
use super::back_out::{exhausted, start_back_out};
use super::config::DecideConfig;
use super::hold::hold;
use super::record::{
    BackOutCause, BranchRecord, DecideState, Decision, DecisionRecord, HealthView, Perception,
    Phase, ReasonCode, SpeedLimit, Verdict,
};
use super::standoff::{Clearance, steer};

/// Result of [`choose_branch`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BranchChoice {
    /// The chosen branch.
    pub chosen: Option<u8>,
    /// The best other eligible branch.
    pub runner_up: Option<u8>,
    /// The incumbent stayed only thanks to the hysteresis band.
    pub held_by_hysteresis: bool,
    /// Statuses after the choice.
    pub status: [BranchStatus; MAX_BRANCHES],
}

/// Eligibility of one branch; `Err` gives the reason it is out.
pub(super) fn eligibility(j: &Junction, k: usize, cfg: &DecideConfig) -> Result<f64, BranchStatus> {
    let b = j.branches().get(k).ok_or(BranchStatus::Unexplored)?;
    if let BranchStatus::DeadEnd(c) = b.status {
        return Err(BranchStatus::DeadEnd(c));
    }
    let required = cfg.required_width_m();
    let unmeasured = b.width_unmeasured();
    if !unmeasured && (b.clear_width_m.is_nan() || b.clear_width_m < required) {
        return Err(BranchStatus::Rejected(RejectReason::TooNarrow {
            width_m: b.clear_width_m,
            required_m: required,
        }));
    }
    let c = dot(b.direction_map, j.trunk_upstream_map);
    if c < cfg.came_from_cos {
        return Err(BranchStatus::Rejected(RejectReason::CameFrom {
            cos_to_upstream: c,
        }));
    }
    let f = b.evidence.mean_flux_kg_per_s;
    if unmeasured && b.evidence.samples == 0 {
        // Seen through the flow only: eligible, ranked below every
        // branch with measured flow.
        return Ok(0.0);
    }
    if b.evidence.samples == 0 || f.is_nan() || f < cfg.min_branch_flux_kg_per_s {
        return Err(BranchStatus::Rejected(RejectReason::NoFlow {
            flux_kg_per_s: f,
        }));
    }
    Ok(f)
}

/// Branches that still need samples (eligible by width and direction, not
/// dead, fewer than `need` samples), first in index order.
pub(super) fn branch_needing_samples(
    j: &Junction,
    need: u32,
    cfg: &DecideConfig,
    after: Option<u8>,
) -> Option<u8> {
    for (k, b) in j.branches().iter().enumerate() {
        let ki = u8::try_from(k).ok()?;
        if after.is_some_and(|a| ki <= a) {
            continue;
        }
        if matches!(b.status, BranchStatus::DeadEnd(_)) {
            continue;
        }
        let wide = b.clear_width_m >= cfg.required_width_m();
        let ahead = dot(b.direction_map, j.trunk_upstream_map) >= cfg.came_from_cos;
        if wide && ahead && b.evidence.samples < need {
            return Some(ki);
        }
    }
    None
}

/// Choose the strongest eligible branch of `j`, keeping `incumbent` unless a
/// challenger beats it by more than the hysteresis fraction. Branches
/// narrower than the required width are never chosen. Ties go to the lower
/// index.
#[must_use]
pub fn choose_branch(j: &Junction, incumbent: Option<u8>, cfg: &DecideConfig) -> BranchChoice {
    let mut status = [BranchStatus::Unexplored; MAX_BRANCHES];
    let mut flux = [0.0f64; MAX_BRANCHES];
    let mut ok = [false; MAX_BRANCHES];
    let n = j.branches().len();
    for k in 0..n {
        match eligibility(j, k, cfg) {
            Ok(f) => {
                if let (Some(fl), Some(o)) = (flux.get_mut(k), ok.get_mut(k)) {
                    *fl = f;
                    *o = true;
                }
            }
            Err(s) => {
                if let Some(st) = status.get_mut(k) {
                    *st = s;
                }
            }
        }
    }
    let mut best: Option<usize> = None;
    for k in 0..n {
        if ok.get(k).copied().unwrap_or(false) && best.is_none_or(|b| flux.get(k) > flux.get(b)) {
            best = Some(k);
        }
    }
    let inc = incumbent
        .map(usize::from)
        .filter(|&i| ok.get(i).copied().unwrap_or(false));
    let mut held = false;
    let chosen = match (inc, best) {
        (Some(i), Some(b)) if b != i => {
            let fi = flux.get(i).copied().unwrap_or(0.0);
            let fb = flux.get(b).copied().unwrap_or(0.0);
            if fb > fi * (1.0 + cfg.branch_hysteresis_frac) {
                Some(b)
            } else {
                held = true;
                Some(i)
            }
        }
        (Some(i), _) => Some(i),
        (None, b) => b,
    };
    let chosen_flux = chosen.and_then(|c| flux.get(c).copied()).unwrap_or(0.0);
    let mut runner: Option<usize> = None;
    for k in 0..n {
        if Some(k) == chosen || !ok.get(k).copied().unwrap_or(false) {
            continue;
        }
        if runner.is_none_or(|r| flux.get(k) > flux.get(r)) {
            runner = Some(k);
        }
        if let Some(st) = status.get_mut(k) {
            *st = BranchStatus::Rejected(RejectReason::WeakerFlow {
                flux_kg_per_s: flux.get(k).copied().unwrap_or(0.0),
                chosen_flux_kg_per_s: chosen_flux,
            });
        }
    }
    if let Some(c) = chosen
        && let Some(st) = status.get_mut(c)
    {
        *st = BranchStatus::Entered;
    }
    BranchChoice {
        chosen: chosen.and_then(|c| u8::try_from(c).ok()),
        runner_up: runner.and_then(|c| u8::try_from(c).ok()),
        held_by_hysteresis: held,
        status,
    }
}

pub(crate) fn branch_record(
    j: &Junction,
    choice: &BranchChoice,
    incumbent: Option<u8>,
    cfg: &DecideConfig,
) -> BranchRecord {
    let mut flux = [0.0; MAX_BRANCHES];
    let mut width = [0.0; MAX_BRANCHES];
    let mut samples = [0u32; MAX_BRANCHES];
    let mut origin = [BranchOrigin::Felt; MAX_BRANCHES];
    let mut sum = 0.0;
    for (k, b) in j.branches().iter().enumerate() {
        if let (Some(f), Some(w), Some(s), Some(o)) = (
            flux.get_mut(k),
            width.get_mut(k),
            samples.get_mut(k),
            origin.get_mut(k),
        ) {
            *f = b.evidence.mean_flux_kg_per_s;
            *w = b.clear_width_m;
            *s = b.evidence.samples;
            *o = b.origin;
        }
        let came_from = dot(b.direction_map, j.trunk_upstream_map) < cfg.came_from_cos;
        if !came_from && b.evidence.samples > 0 {
            sum += b.evidence.mean_flux_kg_per_s;
        }
    }
    let trunk = j.trunk_flux_kg_per_s;
    let residual = if trunk > 0.0 {
        (sum - trunk) / trunk
    } else {
        0.0
    };
    BranchRecord {
        junction: j.id,
        chosen: choice.chosen,
        runner_up: choice.runner_up,
        incumbent,
        held_by_hysteresis: choice.held_by_hysteresis,
        hysteresis_frac: cfg.branch_hysteresis_frac,
        trunk_flux_kg_per_s: trunk,
        continuity_residual: residual,
        continuity_ok: trunk <= 0.0 || libm::fabs(residual) <= cfg.continuity_tolerance,
        required_width_m: cfg.required_width_m(),
        count: j.branch_count,
        flux_kg_per_s: flux,
        width_m: width,
        samples,
        status: choice.status,
        seen_by_flow: j.seen_by_flow,
        origin,
    }
}

pub(super) fn verdict_of(j: &Junction, choice: &BranchChoice, set_tip: Option<u32>) -> Verdict {
    Verdict {
        junction: j.id,
        chosen: choice.chosen,
        status: choice.status,
        count: j.branch_count,
        set_tip,
    }
}

/// The heading into branch `k` of `j` ([`entry_heading`]); for a guessed
/// branch, the upstream flow instead once it points away from every dead
/// branch of `j` (by more than `divergence_rad`) and not back down the
/// trunk: the stream of the branch being looked for, whose true axis the
/// guess only approximates.
pub(super) fn branch_heading(
    j: &Junction,
    k: u8,
    pos: [f64; 3],
    p: &Perception<'_>,
    cfg: &DecideConfig,
) -> Option<[f64; 3]> {
    let b = j.branches().get(usize::from(k))?;
    let along = entry_heading(b, pos, cfg.arrive_m);
    if b.origin != BranchOrigin::Guessed {
        return Some(along);
    }
    let Some(up) = p.flow.velocity_dir_map.and_then(|v| unit(scale(v, -1.0))) else {
        return Some(along);
    };
    let apart = libm::cos(cfg.divergence_rad);
    let away = j
        .branches()
        .iter()
        .all(|o| !matches!(o.status, BranchStatus::DeadEnd(_)) || dot(up, o.direction_map) < apart);
    if away && dot(up, j.trunk_upstream_map) > 0.0 {
        Some(up)
    } else {
        Some(along)
    }
}

/// Near the junction the robot last entered a branch of (within twice
/// `junction_radius_m` of its anchor), upstream flow pointing back into one
/// of its dead branches (within `divergence_rad`) is not followed: the
/// heading into the branch entered is returned instead. The flow of a
/// dead branch still pours into the junction and would lead the robot
/// straight back into it.
pub(super) fn dead_branch_detour<const S: usize, const W: usize, const JN: usize>(
    map: &LocalMap<S, W, JN>,
    state: &DecideState,
    pos: [f64; 3],
    upstream: Option<[f64; 3]>,
    cfg: &DecideConfig,
) -> Option<[f64; 3]> {
    let up = upstream?;
    let j = map.junctions.get(state.in_junction?)?;
    let reach = 2.0 * cfg.junction_radius_m;
    if dist_sq(pos, j.anchor_position_m) > reach * reach {
        return None;
    }
    let apart = libm::cos(cfg.divergence_rad);
    let into_dead = j
        .branches()
        .iter()
        .any(|b| matches!(b.status, BranchStatus::DeadEnd(_)) && dot(up, b.direction_map) >= apart);
    if !into_dead {
        return None;
    }
    let c = j.chosen?;
    let b = j.branches().get(usize::from(c))?;
    if matches!(b.status, BranchStatus::DeadEnd(_)) {
        return None;
    }
    Some(b.direction_map)
}

/// Heading into a branch: toward a point `arrive_m` past the centre of its
/// mouth until the mouth is passed, then along the branch.
pub(super) fn entry_heading(b: &crate::map::Branch, pos: [f64; 3], arrive_m: f64) -> [f64; 3] {
    if dot(sub(pos, b.mouth_m), b.direction_map) >= 0.0 {
        b.direction_map
    } else {
        unit(sub(add(b.mouth_m, scale(b.direction_map, arrive_m)), pos)).unwrap_or(b.direction_map)
    }
}

/// Point into branch `b` of `j` and wait for samples; move on when enough.
#[allow(clippy::too_many_arguments)]
pub(super) fn sampling_step(
    j: &Junction,
    p: &Perception<'_>,
    b: u8,
    since_s: f64,
    second_round: bool,
    rec: DecisionRecord,
    state: &DecideState,
    cfg: &DecideConfig,
    health: &HealthView,
) -> Decision {
    let need = if second_round {
        cfg.min_branch_samples.saturating_mul(2)
    } else {
        cfg.min_branch_samples
    };
    let mut cur = Some((b, since_s));
    match j.branches().get(usize::from(b)) {
        Some(br) => {
            if br.evidence.samples >= need || p.time_s - since_s >= cfg.sample_timeout_s {
                // Branches are sampled in index order; a timed-out branch is
                // not revisited in this round.
                cur = branch_needing_samples(j, need, cfg, Some(b)).map(|k| (k, p.time_s));
            }
        }
        None => cur = None,
    }
    let mut next = *state;
    let pos = p.position_m.unwrap_or([0.0; 3]);
    match cur {
        Some((k, t)) => {
            next.phase = Phase::Sample {
                junction: j.id,
                branch: k,
                since_s: t,
                second_round,
            };
            let dir = j
                .branches()
                .get(usize::from(k))
                .map_or(state.last_heading_map, |x| x.direction_map);
            let mut rec = rec;
            let choice = choose_branch(j, None, cfg);
            rec.branch = Some(branch_record(j, &choice, None, cfg));
            let cl = Clearance::of_record(&rec);
            steer(
                dir,
                pos,
                &cl,
                p,
                rec,
                next,
                cfg,
                health,
                ReasonCode::SampleBranch,
                SpeedLimit::Stopped,
                None,
            )
        }
        None => {
            // Sampling round over: choose.
            let choice = choose_branch(j, None, cfg);
            let br = branch_record(j, &choice, None, cfg);
            if !br.continuity_ok
                && !second_round
                && let Some(k) =
                    branch_needing_samples(j, cfg.min_branch_samples.saturating_mul(2), cfg, None)
            {
                return sampling_step(j, p, k, p.time_s, true, rec, state, cfg, health);
            }
            let mut rec = rec;
            rec.branch = Some(br);
            enter_choice(
                j,
                &choice,
                pos,
                p,
                rec,
                next,
                cfg,
                health,
                ReasonCode::EnterBranch,
                None,
            )
        }
    }
}

#[allow(clippy::too_many_arguments)]
pub(super) fn enter_choice(
    j: &Junction,
    choice: &BranchChoice,
    pos: [f64; 3],
    p: &Perception<'_>,
    rec: DecisionRecord,
    mut next: DecideState,
    cfg: &DecideConfig,
    health: &HealthView,
    reason: ReasonCode,
    set_tip: Option<u32>,
) -> Decision {
    let verdict = verdict_of(j, choice, set_tip);
    match choice.chosen {
        Some(c) => {
            next.phase = Phase::Enter {
                junction: j.id,
                branch: c,
            };
            next.in_junction = Some(j.id);
            let dir = branch_heading(j, c, pos, p, cfg).unwrap_or(next.last_heading_map);
            let cl = Clearance::of_record(&rec);
            steer(
                dir,
                pos,
                &cl,
                p,
                rec,
                next,
                cfg,
                health,
                reason,
                SpeedLimit::Junction,
                Some(verdict),
            )
        }
        None => {
            // Nothing eligible here: this junction is exhausted.
            let mut d = exhausted(j, health, rec, next);
            d.verdict = Some(verdict);
            d
        }
    }
}

/// Resolve an unresolved junction whose sampling is complete.
#[allow(clippy::too_many_arguments)]
pub(super) fn resolve<const S: usize, const W: usize, const JN: usize>(
    _map: &LocalMap<S, W, JN>,
    j: &Junction,
    p: &Perception<'_>,
    pos: [f64; 3],
    _cl: &Clearance,
    mut rec: DecisionRecord,
    state: &DecideState,
    cfg: &DecideConfig,
    health: &HealthView,
    set_tip: Option<u32>,
) -> Decision {
    let choice = choose_branch(j, None, cfg);
    rec.branch = Some(branch_record(j, &choice, None, cfg));
    let reason = if set_tip.is_some() {
        ReasonCode::ResumeNextBranch
    } else {
        ReasonCode::EnterBranch
    };
    enter_choice(
        j, &choice, pos, p, rec, *state, cfg, health, reason, set_tip,
    )
}

/// The junction behaviours for this step: keep sampling, keep entering
/// (or switch, with hysteresis), or start on a junction newly near.
/// `Continue` hands the (possibly updated) memory on to follow.
pub(super) fn junction_step<const S: usize, const W: usize, const JN: usize>(
    map: &LocalMap<S, W, JN>,
    cx: &Step<'_, '_>,
    pos: [f64; 3],
    cl: &Clearance,
    mut rec: DecisionRecord,
) -> ControlFlow<Decision, DecideState> {
    let (p, state, cfg, health) = (cx.p, cx.state, cx.cfg, cx.health);
    let mut next = *state;
    let near = map.junctions.near(pos, cfg.junction_radius_m);
    match state.phase {
        Phase::Sample {
            junction,
            branch,
            since_s,
            second_round,
        } => {
            if let Some(j) = map.junctions.get(junction) {
                return ControlFlow::Break(sampling_step(
                    j,
                    p,
                    branch,
                    since_s,
                    second_round,
                    rec,
                    state,
                    cfg,
                    health,
                ));
            }
            next.phase = Phase::Follow;
        }
        Phase::Enter { junction, branch } => {
            if let Some(j) = map.junctions.get(junction) {
                if dist_sq(pos, j.anchor_position_m) > cfg.junction_radius_m * cfg.junction_radius_m
                {
                    next.phase = Phase::Follow;
                    next.in_junction = Some(junction);
                } else {
                    let choice = choose_branch(j, Some(branch), cfg);
                    let br = branch_record(j, &choice, Some(branch), cfg);
                    rec.branch = Some(br);
                    let Some(c) = choice.chosen else {
                        // The entered branch lost eligibility and nothing else
                        // is eligible: treat as a dead end.
                        return ControlFlow::Break(start_back_out(
                            map,
                            p,
                            pos,
                            BackOutCause::LostFlow,
                            rec,
                            state,
                            cfg,
                            health,
                        ));
                    };
                    let switched = c != branch;
                    let dir = branch_heading(j, c, pos, p, cfg).unwrap_or(cx.last);
                    next.phase = Phase::Enter {
                        junction,
                        branch: c,
                    };
                    next.in_junction = Some(junction);
                    let reason = if switched {
                        ReasonCode::SwitchBranch
                    } else {
                        ReasonCode::EnterBranch
                    };
                    let verdict = switched.then(|| verdict_of(j, &choice, None));
                    return ControlFlow::Break(steer(
                        dir,
                        pos,
                        cl,
                        p,
                        rec,
                        next,
                        cfg,
                        health,
                        reason,
                        SpeedLimit::Junction,
                        verdict,
                    ));
                }
            } else {
                next.phase = Phase::Follow;
            }
        }
        Phase::Follow => {
            if let Some(j) = near
                && j.chosen.is_none()
                && Some(j.id) != state.in_junction
            {
                if !cx.flow_usable {
                    return ControlFlow::Break(hold(
                        cx.hold_heading,
                        rec,
                        ReasonCode::HoldNoFlowAtJunction,
                        next,
                    ));
                }
                if let Some(b) = branch_needing_samples(j, cfg.min_branch_samples, cfg, None) {
                    return ControlFlow::Break(sampling_step(
                        j, p, b, p.time_s, false, rec, state, cfg, health,
                    ));
                }
                return ControlFlow::Break(resolve(
                    map, j, p, pos, cl, rec, state, cfg, health, None,
                ));
            }
        }
        Phase::BackOut { .. } | Phase::GaveUp | Phase::AtSource => {}
    }
    ControlFlow::Continue(next)
}
