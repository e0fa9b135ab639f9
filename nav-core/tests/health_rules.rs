//! Each rule of `nav_core::health` pinned by what it does, at its
//! thresholds (the module doc lists the rules). Written against the
//! survivors of a mutation run (DEVELOPERS.md, "Mutation testing").

use nav_core::health::{
    ChannelReason, ChannelState, Condition, FaultReason, HealthConfig, HealthReport, HealthState,
    OperatingMode, TransitionReason, mode_for,
};

const SUSPECT_TO_FAILED: u16 = 3;
const RECOVER: u16 = 2;

fn cfg() -> HealthConfig {
    HealthConfig {
        suspect_to_failed_frames: SUSPECT_TO_FAILED,
        recover_frames: RECOVER,
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

type H = HealthState<7, 8>;

fn settled() -> H {
    let mut h = H::new(cfg());
    for k in 0..30u32 {
        h.update(&good(), 0.1 * f64::from(k));
    }
    assert_eq!(h.mode, OperatingMode::Nominal);
    h
}

#[test]
fn sensor_changes_counts_condition_changes_only() {
    let mut h = settled();
    let mut t = 3.0;
    let mut step = |h: &mut H, r: HealthReport| {
        t += 0.01;
        h.update(&r, t);
        h.sensor_changes
    };
    let suspect = HealthReport {
        port_suspect_mask: 0b10,
        ..good()
    };
    assert_eq!(step(&mut h, good()), 0, "nothing changed");
    assert_eq!(step(&mut h, suspect), 1, "ok -> suspect");
    assert_eq!(step(&mut h, suspect), 0, "still suspect");
    assert_eq!(step(&mut h, suspect), 1, "suspect -> failed (persistent)");
    assert_eq!(step(&mut h, suspect), 0, "still failed");
    assert_eq!(step(&mut h, good()), 0, "one clean report is not enough");
    assert_eq!(
        step(&mut h, good()),
        1,
        "failed -> ok after the recovery count"
    );
    let both = HealthReport {
        port_failed_mask: 0b1,
        contact_failed_mask: 0b100,
        ..good()
    };
    assert_eq!(step(&mut h, both), 2, "a port and a contact fail at once");
}

#[test]
fn a_suspect_fails_after_exactly_the_configured_streak() {
    let mut h = settled();
    let r = HealthReport {
        port_suspect_mask: 0b100,
        ..good()
    };
    for k in 1..=SUSPECT_TO_FAILED {
        h.update(&r, 3.0 + 0.01 * f64::from(k));
        let s = h.ports[2];
        assert_eq!(s.suspect_streak, k);
        if k < SUSPECT_TO_FAILED {
            assert_eq!(s.condition, Condition::Suspect, "report {k}");
            assert_eq!(s.reason, FaultReason::ReportedSuspect);
            assert_eq!(s.since_s, 3.01, "suspect since its first report");
        } else {
            assert_eq!(s.condition, Condition::Failed, "report {k}");
            assert_eq!(s.reason, FaultReason::PersistentSuspect);
            assert_eq!(s.since_s, 3.0 + 0.01 * f64::from(k));
        }
    }
    // Other ports untouched.
    assert!(
        h.ports
            .iter()
            .enumerate()
            .all(|(i, s)| i == 2 || s.condition == Condition::Ok)
    );
    assert_eq!(h.failed_port_mask(), 0b100);
}

#[test]
fn a_clean_report_resets_the_suspect_streak() {
    let mut h = settled();
    let r = HealthReport {
        port_suspect_mask: 0b1,
        ..good()
    };
    let mut t = 3.0;
    for _ in 0..10 {
        for _ in 0..SUSPECT_TO_FAILED - 1 {
            t += 0.01;
            h.update(&r, t);
        }
        t += 0.01;
        h.update(&good(), t);
        assert_eq!(h.ports[0].suspect_streak, 0);
    }
    assert_ne!(h.ports[0].condition, Condition::Failed);
}

#[test]
fn a_reported_failure_is_immediate_and_recovery_needs_the_clean_count() {
    let mut h = settled();
    let failed = HealthReport {
        contact_failed_mask: 0b1000,
        ..good()
    };
    h.update(&failed, 3.0);
    let s = h.contacts[3];
    assert_eq!(s.condition, Condition::Failed);
    assert_eq!(s.reason, FaultReason::ReportedFailed);
    assert_eq!(s.since_s, 3.0);
    assert_eq!(h.failed_contact_mask(), 0b1000);
    // A second failed report keeps the onset time.
    h.update(&failed, 3.1);
    assert_eq!(h.contacts[3].since_s, 3.0);
    // A suspect report in between resets the clean count.
    h.update(&good(), 3.2);
    assert_eq!(h.contacts[3].clean_streak, 1);
    h.update(
        &HealthReport {
            contact_suspect_mask: 0b1000,
            ..good()
        },
        3.3,
    );
    assert_eq!(h.contacts[3].clean_streak, 0);
    for k in 1..=RECOVER {
        h.update(&good(), 3.3 + 0.1 * f64::from(k));
        let want = if k < RECOVER {
            Condition::Failed
        } else {
            Condition::Ok
        };
        assert_eq!(h.contacts[3].condition, want, "clean report {k}");
    }
    assert_eq!(h.contacts[3].clean_streak, 0);
    assert_eq!(h.failed_contact_mask(), 0);
}

#[test]
fn the_flow_channel_fails_below_the_usable_port_count_not_at_it() {
    let mut h = settled();
    // 7 ports, min 5 usable: two failed leaves 5 (degraded), three leave 4.
    h.update(
        &HealthReport {
            port_failed_mask: 0b11,
            ..good()
        },
        3.0,
    );
    assert_eq!(h.flow.usable_sensors, 5);
    assert_eq!(h.flow.state, ChannelState::Degraded);
    assert_eq!(h.flow.reason, ChannelReason::SomeSensorsFaulty);
    h.update(
        &HealthReport {
            port_failed_mask: 0b111,
            ..good()
        },
        3.01,
    );
    assert_eq!(h.flow.usable_sensors, 4);
    assert_eq!(h.flow.state, ChannelState::Failed);
    assert_eq!(h.flow.reason, ChannelReason::TooFewSensors);
    assert_eq!(h.mode, OperatingMode::TactileOnly);
}

#[test]
fn the_tactile_channel_fails_below_the_usable_contact_count_not_at_it() {
    let mut h = settled();
    // 8 contacts, min 4 usable: four failed leaves 4, five leave 3.
    h.update(
        &HealthReport {
            contact_failed_mask: 0b1111,
            ..good()
        },
        3.0,
    );
    assert_eq!(h.tactile.usable_sensors, 4);
    assert_ne!(h.tactile.state, ChannelState::Failed);
    h.update(
        &HealthReport {
            contact_failed_mask: 0b1_1111,
            ..good()
        },
        3.01,
    );
    assert_eq!(h.tactile.usable_sensors, 3);
    assert_eq!(h.tactile.state, ChannelState::Failed);
    assert_eq!(h.tactile.reason, ChannelReason::TooFewSensors);
    assert_eq!(h.mode, OperatingMode::FlowOnly);
}

#[test]
fn the_tactile_channel_degrades_past_a_quarter_faulty_not_at_it() {
    let mut h = settled();
    // 8 sensors: 2 faulty is a quarter (ok), 3 is more (degraded).
    h.update(
        &HealthReport {
            contact_suspect_mask: 0b11,
            ..good()
        },
        3.0,
    );
    assert_eq!(h.tactile.state, ChannelState::Ok);
    h.update(
        &HealthReport {
            contact_suspect_mask: 0b111,
            ..good()
        },
        3.01,
    );
    assert_eq!(h.tactile.state, ChannelState::Degraded);
    assert_eq!(h.tactile.reason, ChannelReason::SomeSensorsFaulty);
}

#[test]
fn one_faulty_port_degrades_the_flow_channel() {
    let mut h = settled();
    h.update(
        &HealthReport {
            port_suspect_mask: 0b100_0000,
            ..good()
        },
        3.0,
    );
    assert_eq!(h.flow.state, ChannelState::Degraded);
    assert_eq!(h.flow.reason, ChannelReason::SomeSensorsFaulty);
    assert_eq!(h.mode, OperatingMode::FlowDegraded);
}

#[test]
fn degraded_estimates_degrade_their_channel() {
    let mut h = settled();
    h.update(
        &HealthReport {
            flow_degraded: true,
            section_lower_bound_only: true,
            ..good()
        },
        3.0,
    );
    assert_eq!(h.flow.state, ChannelState::Degraded);
    assert_eq!(h.flow.reason, ChannelReason::EstimateDegraded);
    assert_eq!(h.tactile.state, ChannelState::Degraded);
    assert_eq!(h.tactile.reason, ChannelReason::EstimateDegraded);
    // A degraded flag from a probe that did not report is not evidence.
    let mut h = settled();
    h.update(
        &HealthReport {
            probe_reported: false,
            flow_valid: false,
            flow_degraded: true,
            tactile_reported: false,
            section_lower_bound_only: true,
            ..good()
        },
        2.95,
    );
    assert_eq!(h.flow.state, ChannelState::Ok);
    assert_eq!(h.tactile.state, ChannelState::Ok);
}

#[test]
fn channels_go_stale_just_past_their_timeouts() {
    let mut h = settled();
    let t0 = 2.9; // the last good report
    let quiet = HealthReport::default();
    h.update(&quiet, t0 + 0.5);
    assert_eq!(
        h.flow.state,
        ChannelState::Ok,
        "at the timeout: still fresh"
    );
    assert_eq!(h.tactile.state, ChannelState::Ok);
    h.update(&quiet, t0 + 0.5 + 1e-9);
    assert_eq!(h.flow.state, ChannelState::Failed);
    assert_eq!(h.flow.reason, ChannelReason::Stale);
    assert_eq!(h.tactile.state, ChannelState::Failed);
    assert_eq!(h.tactile.reason, ChannelReason::Stale);
    assert_eq!(h.mode, OperatingMode::Hold);
    // A probe report without a valid solution does not refresh the flow.
    let mut h = settled();
    h.update(
        &HealthReport {
            flow_valid: false,
            ..good()
        },
        3.5,
    );
    assert_eq!(h.flow.state, ChannelState::Failed);
    assert_eq!(h.flow.reason, ChannelReason::Stale);
    assert_eq!(h.tactile.state, ChannelState::Ok);
}

#[test]
fn modes_worsen_at_once_and_recover_after_the_dwell() {
    let mut h = settled();
    let no_flow = HealthReport {
        probe_reported: false,
        flow_valid: false,
        ..good()
    };
    let mut t = 2.9;
    // Flow goes stale: tactile-only at once when it does.
    while h.mode == OperatingMode::Nominal {
        t += 0.1;
        h.update(&no_flow, t);
    }
    assert_eq!(h.mode, OperatingMode::TactileOnly);
    let tr = h.last_transition.expect("a transition");
    assert_eq!(tr.reason, TransitionReason::Worsened);
    assert_eq!(
        (tr.from, tr.to),
        (OperatingMode::Nominal, OperatingMode::TactileOnly)
    );
    assert_eq!(tr.time_s, t);
    assert_eq!(
        (tr.flow, tr.tactile),
        (ChannelState::Failed, ChannelState::Ok)
    );
    // Flow back: the better mode waits for mode_recover_s.
    let back = t + 0.1;
    h.update(&good(), back);
    assert_eq!(h.candidate, OperatingMode::Nominal);
    assert_eq!(h.candidate_since_s, back);
    h.update(&good(), back + 0.99);
    assert_eq!(h.mode, OperatingMode::TactileOnly);
    h.update(&good(), back + 1.0);
    assert_eq!(h.mode, OperatingMode::Nominal);
    assert_eq!(
        h.last_transition.map(|t| t.reason),
        Some(TransitionReason::RecoveredAfterDwell)
    );
}

#[test]
fn an_interrupted_recovery_starts_its_dwell_again() {
    let mut h = settled();
    let no_flow = HealthReport {
        probe_reported: false,
        flow_valid: false,
        ..good()
    };
    h.update(&no_flow, 3.5);
    assert_eq!(h.mode, OperatingMode::TactileOnly);
    h.update(&good(), 3.6);
    h.update(&no_flow, 4.2); // stale again before the dwell ran out
    h.update(&good(), 4.3);
    h.update(&good(), 5.0); // 1.4 s after the first recovery, 0.7 s after the second
    assert_eq!(h.mode, OperatingMode::TactileOnly);
    h.update(&good(), 5.3);
    assert_eq!(h.mode, OperatingMode::Nominal);
}

#[test]
fn a_lateral_move_between_equally_severe_modes_is_immediate() {
    let mut h = settled();
    let no_flow = HealthReport {
        probe_reported: false,
        flow_valid: false,
        ..good()
    };
    h.update(&no_flow, 3.5);
    assert_eq!(h.mode, OperatingMode::TactileOnly);
    // Flow back and skin gone at once: flow-only, same severity.
    let no_skin = HealthReport {
        tactile_reported: false,
        ..good()
    };
    h.update(&no_skin, 3.6);
    h.update(&no_skin, 4.1);
    assert_eq!(h.mode, OperatingMode::FlowOnly);
    assert_eq!(
        h.last_transition.map(|t| t.reason),
        Some(TransitionReason::Lateral)
    );
}

#[test]
fn the_mode_table() {
    use ChannelState::{Degraded, Failed, Ok};
    let want = [
        ((Ok, Ok), OperatingMode::Nominal),
        ((Ok, Degraded), OperatingMode::Nominal),
        ((Degraded, Ok), OperatingMode::FlowDegraded),
        ((Degraded, Degraded), OperatingMode::FlowDegraded),
        ((Failed, Ok), OperatingMode::TactileOnly),
        ((Failed, Degraded), OperatingMode::TactileOnly),
        ((Ok, Failed), OperatingMode::FlowOnly),
        ((Degraded, Failed), OperatingMode::FlowOnly),
        ((Failed, Failed), OperatingMode::Hold),
    ];
    for ((f, t), m) in want {
        assert_eq!(mode_for(f, t), m, "{f:?} {t:?}");
    }
    let sev: Vec<u8> = [
        OperatingMode::Nominal,
        OperatingMode::FlowDegraded,
        OperatingMode::TactileOnly,
        OperatingMode::FlowOnly,
        OperatingMode::Hold,
    ]
    .iter()
    .map(|m| m.severity())
    .collect();
    assert_eq!(sev, [0, 1, 2, 2, 3]);
}

#[test]
fn masks_name_the_failed_sensors_only() {
    let mut h = settled();
    h.update(
        &HealthReport {
            port_failed_mask: 0b101_0000,
            port_suspect_mask: 0b1,
            contact_failed_mask: 1 << 7,
            contact_suspect_mask: 0b10,
            ..good()
        },
        3.0,
    );
    assert_eq!(h.failed_port_mask(), 0b101_0000);
    assert_eq!(h.failed_contact_mask(), 1 << 7);
    // Bits beyond the sensor counts are ignored.
    let mut h = settled();
    h.update(
        &HealthReport {
            port_failed_mask: 1 << 31,
            contact_failed_mask: 1 << 63,
            ..good()
        },
        3.0,
    );
    assert_eq!(h.failed_port_mask(), 0);
    assert_eq!(h.failed_contact_mask(), 0);
}
