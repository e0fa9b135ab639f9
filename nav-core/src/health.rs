//! Sensor and channel health, and the operating mode that follows from them.
//!
//! Two sensing channels feed the navigator: the *flow* channel (the
//! multi-hole probe: `P` ports) and the *tactile* channel (`C` skin contact
//! sensors). Each port and each contact sensor has a [`SensorStatus`]
//! (ok / suspect / failed, with the reason and the time it began). Each
//! channel has a [`ChannelStatus`], and the pair of channel statuses gives
//! the [`OperatingMode`].
//!
//! Rules (all thresholds come from [`HealthConfig`]):
//! - A sensor the estimator reports *failed* fails at once. A sensor reported
//!   *suspect* for `suspect_to_failed_frames` consecutive reports fails with
//!   [`FaultReason::PersistentSuspect`]. A suspect or failed sensor returns to
//!   ok only after `recover_frames` consecutive clean reports (hysteresis).
//! - The flow channel is failed when its last valid solution is older than
//!   `flow_timeout_s`, or fewer than `min_ports_usable` ports are not failed;
//!   degraded when any port is suspect or failed, or the last solution was
//!   marked degraded. It is *weak*, not failed, while the probe reports
//!   but the flow is below what one frame resolves and the windowed
//!   estimate ([`crate::flow_window`]) carries the evidence: too little
//!   evidence yet is a reason to slow down, dwell and integrate, not a
//!   broken probe (too few usable ports still fails it). The tactile channel is failed when its last report is
//!   older than `tactile_timeout_s` (a quiet skin, no wall within reach,
//!   counts as a report: knowing no wall is near is not a fault), or fewer
//!   than `min_contacts_usable` sensors are not failed; degraded when the
//!   last section was only a lower bound or more than a quarter of the
//!   sensors are suspect or failed.
//! - Mode hysteresis: a move to a *more severe* mode happens at once (safety
//!   first); a move to a less severe one only after the candidates have
//!   been less severe than the adopted mode for `mode_recover_s` seconds
//!   without interruption (the candidate may change among better modes
//!   meanwhile; the one of the last frame is adopted).

/// Why a sensor is not ok.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FaultReason {
    /// The estimator (probe fault isolation or tactile consistency check)
    /// reported this sensor as failed.
    ReportedFailed,
    /// The estimator reported this sensor as suspect.
    ReportedSuspect,
    /// Reported suspect for too many consecutive frames.
    PersistentSuspect,
}

/// Condition of one sensor.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Condition {
    /// Working.
    Ok,
    /// Possibly faulty; still counted as usable.
    Suspect,
    /// Not usable.
    Failed,
}

/// Status of one port or contact sensor.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SensorStatus {
    /// Current condition.
    pub condition: Condition,
    /// Why it is not ok (meaningless when `condition` is `Ok`).
    pub reason: FaultReason,
    /// Time the current condition began, s.
    pub since_s: f64,
    /// Consecutive suspect reports so far.
    pub suspect_streak: u16,
    /// Consecutive clean reports while not ok (recovery count).
    pub clean_streak: u16,
}

impl SensorStatus {
    const OK: Self = Self {
        condition: Condition::Ok,
        reason: FaultReason::ReportedSuspect,
        since_s: 0.0,
        suspect_streak: 0,
        clean_streak: 0,
    };

    /// Fold one report in; true when the condition changed.
    fn report(&mut self, report: Condition, time_s: f64, cfg: &HealthConfig) -> bool {
        let before = self.condition;
        match report {
            Condition::Failed => {
                self.suspect_streak = 0;
                self.clean_streak = 0;
                if self.condition != Condition::Failed {
                    self.condition = Condition::Failed;
                    self.reason = FaultReason::ReportedFailed;
                    self.since_s = time_s;
                }
            }
            Condition::Suspect => {
                self.clean_streak = 0;
                self.suspect_streak = self.suspect_streak.saturating_add(1);
                if self.condition == Condition::Ok {
                    self.condition = Condition::Suspect;
                    self.reason = FaultReason::ReportedSuspect;
                    self.since_s = time_s;
                }
                if self.condition == Condition::Suspect
                    && self.suspect_streak >= cfg.suspect_to_failed_frames
                {
                    self.condition = Condition::Failed;
                    self.reason = FaultReason::PersistentSuspect;
                    self.since_s = time_s;
                }
            }
            Condition::Ok => {
                self.suspect_streak = 0;
                if self.condition != Condition::Ok {
                    self.clean_streak = self.clean_streak.saturating_add(1);
                    if self.clean_streak >= cfg.recover_frames {
                        self.condition = Condition::Ok;
                        self.since_s = time_s;
                        self.clean_streak = 0;
                    }
                }
            }
        }
        before != self.condition
    }
}

/// Thresholds for health tracking.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct HealthConfig {
    /// Consecutive suspect reports before a sensor is declared failed.
    pub suspect_to_failed_frames: u16,
    /// Consecutive clean reports before a suspect/failed sensor is ok again.
    pub recover_frames: u16,
    /// Minimum ports not failed for a usable flow solution (a probe solving
    /// for direction, dynamic and static pressure needs at least four).
    pub min_ports_usable: u8,
    /// Minimum contact sensors not failed for a usable tactile channel.
    pub min_contacts_usable: u8,
    /// Age of the last valid flow solution beyond which the flow channel
    /// is failed, s.
    pub flow_timeout_s: f64,
    /// Age of the last tactile report (a quiet skin counts) beyond which
    /// the tactile channel is failed, s. The navigator also forgets its
    /// last cross-section after this long without a new one.
    pub tactile_timeout_s: f64,
    /// Time a less severe candidate mode must hold before it is adopted, s.
    pub mode_recover_s: f64,
}

/// Why a channel is degraded or failed.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ChannelReason {
    /// Nothing wrong.
    None,
    /// No usable data within the timeout.
    Stale,
    /// Too few sensors left that are not failed.
    TooFewSensors,
    /// Some sensors suspect or failed, enough left.
    SomeSensorsFaulty,
    /// The estimator marked its last solution degraded (or the section a
    /// lower bound only).
    EstimateDegraded,
    /// Never had data yet.
    NoDataYet,
    /// Flow below what one frame resolves; the windowed estimate is still
    /// integrating (dwell).
    WeakFlowIntegrating,
    /// Flow below what one frame resolves; the windowed estimate has
    /// resolved it (follow slowly).
    WeakFlowResolved,
}

/// State of one channel.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub enum ChannelState {
    /// Usable, nothing wrong.
    Ok,
    /// Usable with reduced confidence.
    Degraded,
    /// The probe works but the flow is too weak for one frame: the windowed
    /// estimate leads (see [`ChannelReason`] for whether it has resolved
    /// the flow yet).
    Weak,
    /// Not usable.
    Failed,
}

/// Status of one channel.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ChannelStatus {
    /// Usable or not.
    pub state: ChannelState,
    /// Why.
    pub reason: ChannelReason,
    /// Sensors of this channel not failed.
    pub usable_sensors: u8,
    /// Time of the last valid flow solution or tactile report, s (`-inf`
    /// before the first).
    pub last_good_s: f64,
}

/// Operating mode.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub enum OperatingMode {
    /// Both channels ok.
    Nominal,
    /// Flow usable but degraded, tactile usable.
    FlowDegraded,
    /// Flow too weak for one frame, tactile usable: follow the windowed
    /// estimate slowly, or dwell while it integrates.
    FlowWeak,
    /// Flow failed, tactile usable: follow the conduit by feel.
    TactileOnly,
    /// Tactile failed, flow usable: creep upstream without standoff
    /// assurance from contacts.
    FlowOnly,
    /// Neither channel usable (or the decision layer found no safe standoff).
    Hold,
}

impl OperatingMode {
    /// Severity rank: higher is worse.
    #[must_use]
    pub const fn severity(self) -> u8 {
        match self {
            Self::Nominal => 0,
            Self::FlowDegraded | Self::FlowWeak => 1,
            Self::TactileOnly | Self::FlowOnly => 2,
            Self::Hold => 3,
        }
    }
}

/// Why the mode changed.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TransitionReason {
    /// A channel got worse: adopted at once.
    Worsened,
    /// A better candidate held for the recovery time.
    RecoveredAfterDwell,
    /// A move between modes of equal severity.
    Lateral,
}

/// The last mode change.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ModeTransition {
    /// Mode before.
    pub from: OperatingMode,
    /// Mode after.
    pub to: OperatingMode,
    /// Why.
    pub reason: TransitionReason,
    /// Flow channel state at the change.
    pub flow: ChannelState,
    /// Tactile channel state at the change.
    pub tactile: ChannelState,
    /// When, s.
    pub time_s: f64,
}

/// What one frame tells the health tracker.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct HealthReport {
    /// Bit k set: port k reported suspect.
    pub port_suspect_mask: u32,
    /// Bit k set: port k reported failed (isolated).
    pub port_failed_mask: u32,
    /// The probe reported this frame (a solution, valid or not).
    pub probe_reported: bool,
    /// The flow solution was valid.
    pub flow_valid: bool,
    /// The flow solution was marked degraded.
    pub flow_degraded: bool,
    /// The flow was below what one frame resolves and the windowed
    /// estimate stood in (`flow_valid` then says whether it resolved it).
    pub flow_weak: bool,
    /// Bit k set: contact sensor k reported suspect.
    pub contact_suspect_mask: u64,
    /// Bit k set: contact sensor k reported failed.
    pub contact_failed_mask: u64,
    /// The tactile layer reported this frame.
    pub tactile_reported: bool,
    /// The section was a lower bound only.
    pub section_lower_bound_only: bool,
}

/// Health of every sensor and channel. `P` ports (<= 32), `C` contact
/// sensors (<= 64).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct HealthState<const P: usize, const C: usize> {
    /// Per-port status, in the probe layout's port order.
    pub ports: [SensorStatus; P],
    /// Per-contact-sensor status, in configuration order.
    pub contacts: [SensorStatus; C],
    /// Flow channel.
    pub flow: ChannelStatus,
    /// Tactile channel.
    pub tactile: ChannelStatus,
    /// Adopted mode.
    pub mode: OperatingMode,
    /// Candidate mode computed from the channels this frame.
    pub candidate: OperatingMode,
    /// Since when the candidate has held, s.
    pub candidate_since_s: f64,
    /// Since when every candidate has been less severe than the adopted
    /// mode, s (`None`: the last was not).
    pub improving_since_s: Option<f64>,
    /// The last mode change, if any.
    pub last_transition: Option<ModeTransition>,
    /// Sensors whose condition changed at the last update.
    pub sensor_changes: u16,
    /// The probe's last report was weak flow ([`HealthReport::flow_weak`]).
    pub flow_was_weak: bool,
    /// Time of the last weak-flow report, s.
    pub flow_weak_last_s: f64,
    cfg: HealthConfig,
}

/// Bit `k` of a mask, false beyond 64.
fn bit(mask: u64, k: usize) -> bool {
    u32::try_from(k)
        .ok()
        .and_then(|s| mask.checked_shr(s))
        .is_some_and(|m| m & 1 == 1)
}

fn report_of(suspect: u64, failed: u64, k: usize) -> Condition {
    if bit(failed, k) {
        Condition::Failed
    } else if bit(suspect, k) {
        Condition::Suspect
    } else {
        Condition::Ok
    }
}

fn count_not_failed(s: &[SensorStatus]) -> u8 {
    let n = s
        .iter()
        .filter(|x| x.condition != Condition::Failed)
        .count();
    u8::try_from(n).unwrap_or(u8::MAX)
}

fn count_faulty(s: &[SensorStatus]) -> usize {
    s.iter().filter(|x| x.condition != Condition::Ok).count()
}

impl<const P: usize, const C: usize> HealthState<P, C> {
    /// Fresh state: every sensor ok, both channels without data yet, so
    /// the mode starts at [`OperatingMode::Hold`].
    #[must_use]
    pub fn new(cfg: HealthConfig) -> Self {
        let none = ChannelStatus {
            state: ChannelState::Failed,
            reason: ChannelReason::NoDataYet,
            usable_sensors: 0,
            last_good_s: f64::NEG_INFINITY,
        };
        Self {
            ports: [SensorStatus::OK; P],
            contacts: [SensorStatus::OK; C],
            flow: none,
            tactile: none,
            mode: OperatingMode::Hold,
            candidate: OperatingMode::Hold,
            candidate_since_s: f64::NEG_INFINITY,
            improving_since_s: None,
            last_transition: None,
            sensor_changes: 0,
            flow_was_weak: false,
            flow_weak_last_s: f64::NEG_INFINITY,
            cfg,
        }
    }

    /// Bit k set when port k is failed.
    #[must_use]
    pub fn failed_port_mask(&self) -> u32 {
        let mut m = 0u32;
        for (k, s) in self.ports.iter().enumerate().take(32) {
            if s.condition == Condition::Failed {
                m |= 1u32 << k;
            }
        }
        m
    }

    /// Bit k set when contact sensor k is failed.
    #[must_use]
    pub fn failed_contact_mask(&self) -> u64 {
        let mut m = 0u64;
        for (k, s) in self.contacts.iter().enumerate().take(64) {
            if s.condition == Condition::Failed {
                m |= 1u64 << k;
            }
        }
        m
    }

    /// Fold one frame's report in at `time_s` (frames must come in time
    /// order; the navigator guarantees it).
    pub fn update(&mut self, r: &HealthReport, time_s: f64) {
        let cfg = self.cfg;
        let mut changes = 0u16;
        if r.probe_reported {
            for (k, s) in self.ports.iter_mut().enumerate() {
                let c = report_of(
                    u64::from(r.port_suspect_mask),
                    u64::from(r.port_failed_mask),
                    k,
                );
                if s.report(c, time_s, &cfg) {
                    changes = changes.saturating_add(1);
                }
            }
            if r.flow_valid {
                self.flow.last_good_s = time_s;
            }
            self.flow_was_weak = r.flow_weak;
            if r.flow_weak {
                self.flow_weak_last_s = time_s;
            }
        }
        if r.tactile_reported {
            for (k, s) in self.contacts.iter_mut().enumerate() {
                let c = report_of(r.contact_suspect_mask, r.contact_failed_mask, k);
                if s.report(c, time_s, &cfg) {
                    changes = changes.saturating_add(1);
                }
            }
            // A quiet skin (no wall within reach) is a report too: the
            // channel is alive. Whether a cross-section is known is a
            // clearance question for the decision stage, not a fault.
            self.tactile.last_good_s = time_s;
        }
        self.sensor_changes = changes;

        // Flow channel.
        let usable = count_not_failed(&self.ports);
        self.flow.usable_sensors = usable;
        let flow_age = time_s - self.flow.last_good_s;
        let weak_age = time_s - self.flow_weak_last_s;
        // Weak while weak frames keep coming (within the flow timeout) and
        // no valid frame of its own has come since: a frame that is
        // neither (no solution, no direction) does not end it.
        let weak = weak_age <= cfg.flow_timeout_s
            && (self.flow_was_weak || self.flow_weak_last_s >= self.flow.last_good_s);
        let (fs, fr) = if self.flow.last_good_s == f64::NEG_INFINITY && !weak {
            (ChannelState::Failed, ChannelReason::NoDataYet)
        } else if usable < cfg.min_ports_usable {
            (ChannelState::Failed, ChannelReason::TooFewSensors)
        } else if weak {
            let resolved = flow_age.is_finite() && flow_age <= weak_age;
            let reason = if resolved {
                ChannelReason::WeakFlowResolved
            } else {
                ChannelReason::WeakFlowIntegrating
            };
            (ChannelState::Weak, reason)
        } else if flow_age.is_nan() || flow_age > cfg.flow_timeout_s {
            (ChannelState::Failed, ChannelReason::Stale)
        } else if count_faulty(&self.ports) > 0 {
            (ChannelState::Degraded, ChannelReason::SomeSensorsFaulty)
        } else if r.probe_reported && r.flow_degraded {
            (ChannelState::Degraded, ChannelReason::EstimateDegraded)
        } else {
            (ChannelState::Ok, ChannelReason::None)
        };
        self.flow.state = fs;
        self.flow.reason = fr;

        // Tactile channel.
        let usable_c = count_not_failed(&self.contacts);
        self.tactile.usable_sensors = usable_c;
        let tac_age = time_s - self.tactile.last_good_s;
        let (ts, tr) = if self.tactile.last_good_s == f64::NEG_INFINITY {
            (ChannelState::Failed, ChannelReason::NoDataYet)
        } else if usable_c < cfg.min_contacts_usable {
            (ChannelState::Failed, ChannelReason::TooFewSensors)
        } else if tac_age.is_nan() || tac_age > cfg.tactile_timeout_s {
            (ChannelState::Failed, ChannelReason::Stale)
        } else if count_faulty(&self.contacts) * 4 > C {
            (ChannelState::Degraded, ChannelReason::SomeSensorsFaulty)
        } else if r.tactile_reported && r.section_lower_bound_only {
            (ChannelState::Degraded, ChannelReason::EstimateDegraded)
        } else {
            (ChannelState::Ok, ChannelReason::None)
        };
        self.tactile.state = ts;
        self.tactile.reason = tr;

        let cand = mode_for(fs, ts);
        if cand != self.candidate {
            self.candidate = cand;
            self.candidate_since_s = time_s;
        }
        let cur = self.mode;
        // The recovery dwell runs while the candidates are better than the
        // adopted mode, whichever better mode each is: weak air whose
        // frames alternate between weak and resolved ones gives a candidate
        // that changes every few frames, and a dwell restarted at each
        // change held the robot in hold for a whole run.
        if cand.severity() < cur.severity() {
            self.improving_since_s.get_or_insert(time_s);
        } else {
            self.improving_since_s = None;
        }
        if cand != cur {
            let recovered = self
                .improving_since_s
                .is_some_and(|since| time_s - since >= cfg.mode_recover_s);
            let reason = if cand.severity() > cur.severity() {
                Some(TransitionReason::Worsened)
            } else if cand.severity() == cur.severity() {
                Some(TransitionReason::Lateral)
            } else if recovered {
                Some(TransitionReason::RecoveredAfterDwell)
            } else {
                None
            };
            if let Some(reason) = reason {
                self.mode = cand;
                self.improving_since_s = None;
                self.last_transition = Some(ModeTransition {
                    from: cur,
                    to: cand,
                    reason,
                    flow: fs,
                    tactile: ts,
                    time_s,
                });
            }
        }
    }
}

/// The mode a pair of channel states calls for.
#[must_use]
pub const fn mode_for(flow: ChannelState, tactile: ChannelState) -> OperatingMode {
    match (flow, tactile) {
        (ChannelState::Failed, ChannelState::Failed) => OperatingMode::Hold,
        (ChannelState::Failed, _) => OperatingMode::TactileOnly,
        // Weak flow without the skin: nothing to creep on safely.
        (ChannelState::Weak, ChannelState::Failed) => OperatingMode::Hold,
        (ChannelState::Weak, _) => OperatingMode::FlowWeak,
        (_, ChannelState::Failed) => OperatingMode::FlowOnly,
        (ChannelState::Degraded, _) => OperatingMode::FlowDegraded,
        (ChannelState::Ok, _) => OperatingMode::Nominal,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn cfg() -> HealthConfig {
        HealthConfig {
            suspect_to_failed_frames: 3,
            recover_frames: 2,
            min_ports_usable: 5,
            min_contacts_usable: 4,
            flow_timeout_s: 0.5,
            tactile_timeout_s: 0.5,
            mode_recover_s: 1.0,
        }
    }

    fn good() -> HealthReport {
        HealthReport {
            probe_reported: true,
            flow_valid: true,
            tactile_reported: true,
            ..HealthReport::default()
        }
    }

    #[test]
    fn starts_in_hold_then_nominal() {
        let mut h: HealthState<7, 8> = HealthState::new(cfg());
        assert_eq!(h.mode, OperatingMode::Hold);
        h.update(&good(), 0.0);
        assert_eq!(h.candidate, OperatingMode::Nominal);
        // Improvement needs the dwell.
        assert_eq!(h.mode, OperatingMode::Hold);
        h.update(&good(), 0.5);
        assert_eq!(h.mode, OperatingMode::Hold);
        h.update(&good(), 1.0);
        assert_eq!(h.mode, OperatingMode::Nominal);
        let t = h.last_transition.unwrap();
        assert_eq!(t.reason, TransitionReason::RecoveredAfterDwell);
    }

    #[test]
    fn persistent_suspect_fails_and_recovers_with_hysteresis() {
        let mut h: HealthState<7, 8> = HealthState::new(cfg());
        let mut r = good();
        r.port_suspect_mask = 1 << 2;
        h.update(&r, 0.0);
        assert_eq!(h.ports[2].condition, Condition::Suspect);
        h.update(&r, 0.1);
        h.update(&r, 0.2);
        assert_eq!(h.ports[2].condition, Condition::Failed);
        assert_eq!(h.ports[2].reason, FaultReason::PersistentSuspect);
        assert_eq!(h.ports[2].since_s, 0.2);
        assert_eq!(h.flow.state, ChannelState::Degraded);
        let g = good();
        h.update(&g, 0.3);
        assert_eq!(h.ports[2].condition, Condition::Failed);
        h.update(&g, 0.4);
        assert_eq!(h.ports[2].condition, Condition::Ok);
    }

    #[test]
    fn too_few_ports_fails_flow_at_once() {
        let mut h: HealthState<7, 8> = HealthState::new(cfg());
        for i in 0..12 {
            h.update(&good(), f64::from(i) * 0.1);
        }
        assert_eq!(h.mode, OperatingMode::Nominal);
        let mut r = good();
        r.port_failed_mask = 0b111;
        h.update(&r, 1.3);
        assert_eq!(h.flow.state, ChannelState::Failed);
        assert_eq!(h.flow.reason, ChannelReason::TooFewSensors);
        assert_eq!(h.mode, OperatingMode::TactileOnly);
        assert_eq!(
            h.last_transition.unwrap().reason,
            TransitionReason::Worsened
        );
    }

    #[test]
    fn stale_channels_hold() {
        let mut h: HealthState<7, 8> = HealthState::new(cfg());
        for i in 0..12 {
            h.update(&good(), f64::from(i) * 0.1);
        }
        h.update(&HealthReport::default(), 1.7);
        assert_eq!(h.flow.reason, ChannelReason::Stale);
        assert_eq!(h.tactile.reason, ChannelReason::Stale);
        assert_eq!(h.mode, OperatingMode::Hold);
    }

    /// A probe report of weak air (no resolved direction yet), the skin
    /// reporting.
    fn weak_report() -> HealthReport {
        HealthReport {
            probe_reported: true,
            flow_valid: false,
            flow_weak: true,
            tactile_reported: true,
            ..HealthReport::default()
        }
    }

    /// Weak air reaches the mode, and frames with no direction at all
    /// (no solution, or none for another reason) between the weak ones do
    /// not fail the channel: it stays weak until the flow timeout. Before,
    /// one such frame in six failed it and put the mode back in hold, so
    /// the recovery dwell never ran out and the robot never moved.
    #[test]
    fn weak_flow_survives_frames_without_a_direction() {
        let mut h: HealthState<7, 8> = HealthState::new(cfg());
        let weak = weak_report();
        let neither = HealthReport {
            flow_weak: false,
            ..weak
        };
        for i in 0..300 {
            let r = if i % 6 == 5 { &neither } else { &weak };
            h.update(r, f64::from(i) * 0.01);
            assert_eq!(h.flow.state, ChannelState::Weak, "frame {i}");
        }
        assert_eq!(h.mode, OperatingMode::FlowWeak);
        // With nothing weak for longer than the timeout, the channel fails.
        for i in 300..400 {
            h.update(&neither, f64::from(i) * 0.01);
        }
        assert_eq!(h.flow.state, ChannelState::Failed);
        // A valid frame ends the weak state at once.
        let mut h: HealthState<7, 8> = HealthState::new(cfg());
        h.update(&weak, 0.0);
        h.update(&good(), 0.01);
        assert_eq!(h.flow.state, ChannelState::Ok);
    }

    /// Out of hold, the dwell runs while the candidates are better than
    /// hold even when they alternate between better modes every frame
    /// (weak and resolved air): before, each change restarted it and the
    /// robot held for a whole run.
    #[test]
    fn recovery_dwell_runs_through_changes_among_better_candidates() {
        let mut h: HealthState<7, 8> = HealthState::new(cfg());
        let weak = weak_report();
        let mut t = 0.0;
        for i in 0..200 {
            let r = if i % 3 == 0 { good() } else { weak };
            h.update(&r, t);
            t += 0.01;
        }
        assert_ne!(h.mode, OperatingMode::Hold, "still in hold after 2 s");
        assert_eq!(
            h.last_transition.map(|x| x.reason),
            Some(TransitionReason::RecoveredAfterDwell)
        );
        // A worse candidate in between restarts the dwell.
        let mut h: HealthState<7, 8> = HealthState::new(cfg());
        h.update(&good(), 0.0);
        h.update(&good(), 0.6);
        let dead = HealthReport {
            port_failed_mask: 0x7f,
            contact_failed_mask: 0xff,
            ..good()
        };
        h.update(&dead, 0.7);
        assert_eq!(h.candidate, OperatingMode::Hold);
        // The sensors recover after two good reports (0.8 and 0.81 s).
        h.update(&good(), 0.8);
        h.update(&good(), 0.81);
        assert_eq!(h.candidate, OperatingMode::Nominal);
        h.update(&good(), 1.5);
        assert_eq!(h.mode, OperatingMode::Hold, "the dwell did not restart");
        h.update(&good(), 1.82);
        assert_eq!(h.mode, OperatingMode::Nominal);
    }
}
