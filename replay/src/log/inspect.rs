//! Summary of a log: header, counts, time span and gaps, sensor health,
//! damage.

use std::io::Read;

use serde::Serialize;

use super::reader::{LogReader, ReadOptions, SalvageStats};
use super::{Damage, EndRecord, Event, LogError, LogHeader, Record};
use crate::record::{FrameRecord, ProbeLayoutSpec};

/// Records per kind.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize)]
pub struct KindCounts {
    /// Sensor frames.
    pub frames: u64,
    /// Events, all types.
    pub events: u64,
    /// Of which fault injections.
    pub faults_injected: u64,
    /// Of which fault clearings.
    pub faults_cleared: u64,
    /// Of which ground-truth markers.
    pub truth_markers: u64,
    /// Of which notes.
    pub notes: u64,
    /// End records.
    pub ends: u64,
    /// Intact records of kinds this code does not know.
    pub unknown: u64,
}

/// Frame times.
#[derive(Debug, Clone, Copy, PartialEq, Default, Serialize)]
pub struct TimeStats {
    /// First frame time, s.
    pub first_s: Option<f64>,
    /// Last frame time, s.
    pub last_s: Option<f64>,
    /// Last minus first, s.
    pub span_s: Option<f64>,
    /// Nominal frame period used for gap counting, s: the header's
    /// `frame_period_s`, else the median of the first 1001 positive steps.
    pub nominal_step_s: Option<f64>,
    /// Whether `nominal_step_s` came from the header (else it was estimated).
    pub step_from_header: bool,
    /// Largest step between consecutive frames, s.
    pub largest_gap_s: Option<f64>,
    /// Time of the frame before the largest step, s.
    pub largest_gap_after_s: Option<f64>,
    /// Steps longer than twice the nominal step.
    pub gaps_over_two_steps: u64,
    /// Steps where time did not increase (equal, backwards, or NaN).
    pub non_increasing_steps: u64,
}

/// Which channels the frames carry, and how clean they are.
#[derive(Debug, Clone, Copy, PartialEq, Default, Serialize)]
pub struct SensorHealth {
    /// Frames looked at.
    pub frames: u64,
    /// Frames with a pose.
    pub with_pose: u64,
    /// Frames with joint angles.
    pub with_joints: u64,
    /// Frames with port pressures.
    pub with_ports: u64,
    /// Frames with a total temperature.
    pub with_temperature: u64,
    /// Frames with at least one contact.
    pub with_contacts: u64,
    /// Fraction of frames with a pose.
    pub pose_fraction: f64,
    /// Fraction of frames with joint angles.
    pub joints_fraction: f64,
    /// Fraction of frames with port pressures.
    pub ports_fraction: f64,
    /// Fraction of frames with at least one contact.
    pub contacts_fraction: f64,
    /// Contacts over all frames.
    pub contacts_total: u64,
    /// Most contacts in one frame.
    pub max_contacts_in_frame: u64,
    /// Frames whose time is NaN.
    pub nan_time: u64,
    /// Frames with a NaN anywhere in the pose.
    pub nan_pose: u64,
    /// NaN joint angles (values).
    pub nan_joint_values: u64,
    /// NaN port pressures (values).
    pub nan_port_values: u64,
    /// NaN contact forces or normals (contacts).
    pub nan_contacts: u64,
    /// NaN temperatures (frames).
    pub nan_temperature: u64,
    /// Infinite values anywhere in a frame (time, pose, joints, ports,
    /// temperature, contacts).
    pub infinite_values: u64,
    /// Frames whose port count differs from the header's probe layout.
    pub port_count_mismatch: u64,
    /// Frames whose joint count differs from the header's module chain.
    pub joint_count_mismatch: u64,
    /// Contacts naming a module or sensor the header does not have.
    pub contacts_unknown_sensor: u64,
}

/// What [`inspect`] found.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct InspectReport {
    /// File header size, bytes.
    pub header_bytes: u64,
    /// Bytes read (the file size when reading ran to the end).
    pub bytes_read: u64,
    /// The header.
    pub header: LogHeader,
    /// Records per kind.
    pub counts: KindCounts,
    /// Frame times.
    pub time: TimeStats,
    /// Sensor channels.
    pub health: SensorHealth,
    /// The end record, if read.
    pub end: Option<EndRecord>,
    /// Damage found, in file order.
    pub damage: Vec<Damage>,
    /// Salvage counters.
    pub salvage: SalvageStats,
}

impl InspectReport {
    /// Whether the log is complete and undamaged.
    #[must_use]
    pub fn is_clean(&self) -> bool {
        self.salvage.damaged_places == 0
    }
}

const STEP_SAMPLE: usize = 1001;

#[derive(Debug, Default)]
struct TimeAcc {
    stats: TimeStats,
    prev: Option<f64>,
    early_steps: Vec<f64>,
    step: Option<f64>,
}

impl TimeAcc {
    fn count_gap(step_s: f64, nominal: f64, stats: &mut TimeStats) {
        if step_s > 2.0 * nominal {
            stats.gaps_over_two_steps += 1;
        }
    }

    fn push(&mut self, t: f64) {
        if self.stats.first_s.is_none() {
            self.stats.first_s = Some(t);
        }
        self.stats.last_s = Some(t);
        if let Some(p) = self.prev {
            let d = t - p;
            if d > 0.0 {
                if self.stats.largest_gap_s.is_none_or(|g| d > g) {
                    self.stats.largest_gap_s = Some(d);
                    self.stats.largest_gap_after_s = Some(p);
                }
                match self.step {
                    Some(n) => Self::count_gap(d, n, &mut self.stats),
                    None => {
                        self.early_steps.push(d);
                        if self.early_steps.len() == STEP_SAMPLE {
                            self.settle_step();
                        }
                    }
                }
            } else {
                self.stats.non_increasing_steps += 1;
            }
        }
        self.prev = Some(t);
    }

    fn settle_step(&mut self) {
        if self.step.is_none() && !self.early_steps.is_empty() {
            let mut s = self.early_steps.clone();
            s.sort_by(f64::total_cmp);
            self.step = s.get(s.len() / 2).copied();
            self.stats.step_from_header = false;
        }
        if let Some(n) = self.step {
            for &d in &self.early_steps {
                Self::count_gap(d, n, &mut self.stats);
            }
        }
        self.early_steps.clear();
        self.stats.nominal_step_s = self.step;
    }
}

fn frac(n: u64, of: u64) -> f64 {
    if of == 0 {
        0.0
    } else {
        // Counts stay far below 2^52: exact conversion.
        #[allow(clippy::cast_precision_loss)]
        let r = n as f64 / of as f64;
        r
    }
}

/// Infinite values anywhere in a frame.
fn infinite_in(f: &FrameRecord) -> u64 {
    let inf = |v: &f64| u64::from(v.is_infinite());
    let mut n = inf(&f.time_s);
    if let Some(p) = &f.pose {
        n += p.position_m.iter().map(inf).sum::<u64>()
            + p.orientation_wxyz.iter().map(inf).sum::<u64>()
            + inf(&p.position_sigma_m)
            + inf(&p.attitude_sigma_rad);
    }
    if let Some(js) = &f.joints {
        n += js
            .iter()
            .map(|j| inf(&j.pitch_rad) + inf(&j.yaw_rad))
            .sum::<u64>();
    }
    if let Some(ps) = &f.port_pressures_pa {
        n += ps.iter().map(inf).sum::<u64>();
    }
    if let Some(t) = &f.total_temperature_k {
        n += inf(t);
    }
    for c in &f.contacts {
        n += inf(&c.force_n)
            + c.normal_module
                .map_or(0, |v| v.iter().map(inf).sum::<u64>());
    }
    n
}

fn health_of(h: &mut SensorHealth, f: &FrameRecord, header: &LogHeader) {
    h.frames += 1;
    h.infinite_values += infinite_in(f);
    if f.time_s.is_nan() {
        h.nan_time += 1;
    }
    if let Some(p) = &f.pose {
        h.with_pose += 1;
        let any_nan = p.position_m.iter().any(|v| v.is_nan())
            || p.orientation_wxyz.iter().any(|v| v.is_nan())
            || p.position_sigma_m.is_nan()
            || p.attitude_sigma_rad.is_nan();
        if any_nan {
            h.nan_pose += 1;
        }
    }
    if let Some(js) = &f.joints {
        h.with_joints += 1;
        let nan = js
            .iter()
            .map(|j| u64::from(j.pitch_rad.is_nan()) + u64::from(j.yaw_rad.is_nan()))
            .sum::<u64>();
        h.nan_joint_values += nan;
        if js.len() + 1 != header.robot.modules.len() {
            h.joint_count_mismatch += 1;
        }
    }
    if let Some(ps) = &f.port_pressures_pa {
        h.with_ports += 1;
        h.nan_port_values += ps.iter().filter(|v| v.is_nan()).count() as u64;
        let want = match &header.robot.probe.layout {
            ProbeLayoutSpec::FivePort { .. } => 5,
            ProbeLayoutSpec::SevenPort { .. } => 7,
            ProbeLayoutSpec::Custom { normals } => normals.len(),
        };
        if ps.len() != want {
            h.port_count_mismatch += 1;
        }
    }
    if let Some(t) = f.total_temperature_k {
        h.with_temperature += 1;
        if t.is_nan() {
            h.nan_temperature += 1;
        }
    }
    if !f.contacts.is_empty() {
        h.with_contacts += 1;
    }
    let n = f.contacts.len() as u64;
    h.contacts_total += n;
    h.max_contacts_in_frame = h.max_contacts_in_frame.max(n);
    for c in &f.contacts {
        if c.force_n.is_nan()
            || c.normal_module
                .is_some_and(|v| v.iter().any(|x| x.is_nan()))
        {
            h.nan_contacts += 1;
        }
        let known = header
            .robot
            .modules
            .get(usize::from(c.module))
            .is_some_and(|m| usize::from(c.sensor) < m.sensors.len());
        if !known {
            h.contacts_unknown_sensor += 1;
        }
    }
}

/// Read a whole log in salvage mode (whatever `opts.salvage` says) and
/// summarise it. Memory is bounded: nothing per record is kept.
///
/// # Errors
/// Header damage ([`LogError::Damaged`]) or an I/O error. Damage after the
/// header is in the report, not an error.
pub fn inspect<R: Read>(src: R, opts: ReadOptions) -> Result<InspectReport, LogError> {
    let mut reader = LogReader::open(
        src,
        ReadOptions {
            salvage: true,
            ..opts
        },
    )?;
    let header = reader.header().clone();
    let mut counts = KindCounts::default();
    let mut health = SensorHealth::default();
    let mut time = TimeAcc {
        step: header.frame_period_s.filter(|s| *s > 0.0),
        ..TimeAcc::default()
    };
    time.stats.step_from_header = time.step.is_some();
    let mut end = None;
    while let Some(rec) = reader.next_record()? {
        match rec {
            Record::Frame(f) => {
                counts.frames += 1;
                time.push(f.time_s);
                health_of(&mut health, &f, &header);
            }
            Record::Event(e) => {
                counts.events += 1;
                match e.event {
                    Event::FaultInjected { .. } => counts.faults_injected += 1,
                    Event::FaultCleared { .. } => counts.faults_cleared += 1,
                    Event::Truth { .. } => counts.truth_markers += 1,
                    Event::Note { .. } => counts.notes += 1,
                }
            }
            Record::End(e) => {
                counts.ends += 1;
                end = Some(e);
            }
        }
    }
    time.settle_step();
    let mut ts = time.stats;
    if let (Some(a), Some(b)) = (ts.first_s, ts.last_s) {
        ts.span_s = Some(b - a);
    }
    counts.unknown = reader
        .damage()
        .iter()
        .filter(|d| matches!(d.kind, super::DamageKind::UnknownKind { .. }))
        .count() as u64;
    health.pose_fraction = frac(health.with_pose, health.frames);
    health.joints_fraction = frac(health.with_joints, health.frames);
    health.ports_fraction = frac(health.with_ports, health.frames);
    health.contacts_fraction = frac(health.with_contacts, health.frames);
    Ok(InspectReport {
        header_bytes: reader.header_bytes(),
        bytes_read: reader.offset(),
        header,
        counts,
        time: ts,
        health,
        end,
        damage: reader.damage().to_vec(),
        salvage: reader.stats(),
    })
}

/// A time or interval rounded for reading (the JSON report keeps full
/// precision).
fn opt(v: Option<f64>, unit: &str) -> String {
    v.map_or_else(|| "-".to_owned(), |x| format!("{x:.3} {unit}"))
}

fn plural(n: u64, one: &str, many: &str) -> String {
    format!("{n} {}", if n == 1 { one } else { many })
}

impl std::fmt::Display for InspectReport {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let h = &self.header;
        writeln!(
            f,
            "header: {} bytes; {}, probe {}, gas gamma {} R {} J/(kg K)",
            self.header_bytes,
            plural(h.robot.modules.len() as u64, "module", "modules"),
            h.robot.probe.layout,
            h.gas.gamma,
            h.gas.r_j_per_kg_k
        )?;
        for (k, v) in &h.provenance {
            writeln!(f, "  provenance {k} = {v}")?;
        }
        let units: Vec<String> = h.units.iter().map(|(q, u)| format!("{q} {u}")).collect();
        writeln!(f, "  units: {}", units.join(", "))?;
        let c = &self.counts;
        writeln!(
            f,
            "records: {} frames, {} events ({} faults injected, {} cleared, {} truth markers, {} notes), {} end, {} unknown kind",
            c.frames,
            c.events,
            c.faults_injected,
            c.faults_cleared,
            c.truth_markers,
            c.notes,
            c.ends,
            c.unknown
        )?;
        let t = &self.time;
        writeln!(
            f,
            "time: {} to {} (span {}); nominal step {} ({})",
            opt(t.first_s, "s"),
            opt(t.last_s, "s"),
            opt(t.span_s, "s"),
            opt(t.nominal_step_s, "s"),
            if t.step_from_header {
                "header"
            } else {
                "estimated"
            }
        )?;
        writeln!(
            f,
            "gaps: largest {} after t = {}; {} steps over 2 nominal steps; {} non-increasing steps",
            opt(t.largest_gap_s, "s"),
            opt(t.largest_gap_after_s, "s"),
            t.gaps_over_two_steps,
            t.non_increasing_steps
        )?;
        let s = &self.health;
        writeln!(
            f,
            "health: pose {:.3}, joints {:.3}, ports {:.3}, contacts {:.3} of {} frames; temperature in {}",
            s.pose_fraction,
            s.joints_fraction,
            s.ports_fraction,
            s.contacts_fraction,
            s.frames,
            s.with_temperature
        )?;
        writeln!(
            f,
            "  NaN: time {}, pose {}, joint values {}, port values {}, contacts {}, temperature {}",
            s.nan_time,
            s.nan_pose,
            s.nan_joint_values,
            s.nan_port_values,
            s.nan_contacts,
            s.nan_temperature
        )?;
        writeln!(f, "  infinite values: {}", s.infinite_values)?;
        writeln!(
            f,
            "  contacts: {} total, at most {} in a frame, {} naming no known sensor; count mismatches: ports {}, joints {}",
            s.contacts_total,
            s.max_contacts_in_frame,
            s.contacts_unknown_sensor,
            s.port_count_mismatch,
            s.joint_count_mismatch
        )?;
        match &self.end {
            Some(e) => writeln!(
                f,
                "end: {} frames, {} events written; note: {}",
                e.frames, e.events, e.note
            )?,
            None => writeln!(f, "end: no end record")?,
        }
        let v = &self.salvage;
        writeln!(
            f,
            "damage: {}, {} bytes skipped, {} lost, {} skipped",
            plural(v.damaged_places, "place", "places"),
            v.bytes_skipped,
            plural(v.records_lost, "record", "records"),
            plural(v.duplicates_skipped, "repeated record", "repeated records")
        )?;
        for d in &self.damage {
            writeln!(f, "  {d}")?;
        }
        if v.damage_not_listed > 0 {
            writeln!(f, "  ... and {} more not listed", v.damage_not_listed)?;
        }
        Ok(())
    }
}
