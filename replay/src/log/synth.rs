//! Synthetic logs for size and speed figures, and for tests.
//!
//! The frames are invented: smooth made-up signals, no physics. They only
//! give every channel a realistic size and non-trivial bits.

use std::io::Cursor;
use std::time::Instant;

use super::{LogError, LogHeader, LogReader, LogWriter, ReadOptions, Record};
use crate::record::{
    ContactRecord, FrameRecord, GasSpec, JointRecord, ModuleSpec, PoseRecord, ProbeLayoutSpec,
    ProbeSpec, RobotSpec, SensorSpec,
};

/// A demo robot: `modules` modules of 0.12 m by 0.04 m radius, four
/// contact sensors each, a 7-port probe (invented configuration).
#[must_use]
pub fn demo_robot(modules: usize) -> RobotSpec {
    let sensors = (0..4)
        .map(|k| SensorSpec {
            axial_m: 0.06,
            angle_deg: 90.0 * f64::from(k),
            measures_normal: k % 2 == 0,
            cap_polar_deg: None,
        })
        .collect::<Vec<_>>();
    RobotSpec {
        modules: (0..modules)
            .map(|_| ModuleSpec {
                length_m: 0.12,
                radius_m: 0.04,
                sensors: sensors.clone(),
            })
            .collect(),
        probe: ProbeSpec {
            layout: ProbeLayoutSpec::SevenPort {
                cone_angle_deg: 40.0,
            },
            head_radius_m: 0.02,
            port_noise_pa: 2.0,
        },
        max_speed_m_per_s: 0.3,
    }
}

/// A header for [`demo_robot`] in air (gamma 1.4, R 287.05 J/(kg K),
/// common practice values), 100 Hz.
#[must_use]
pub fn demo_header(modules: usize) -> LogHeader {
    let mut h = LogHeader::new(
        demo_robot(modules),
        GasSpec {
            gamma: 1.4,
            r_j_per_kg_k: 287.05,
        },
    );
    h.frame_period_s = Some(0.01);
    h.provenance
        .insert("made_by".to_owned(), "replay::log::synth".to_owned());
    h
}

/// Frame number `i` of a synthetic stream at 100 Hz with `ports` port
/// pressures, `joints` joints and `contacts` contacts.
#[must_use]
pub fn synthetic_frame(i: u32, ports: usize, joints: usize, contacts: usize) -> FrameRecord {
    let t = f64::from(i) * 0.01;
    FrameRecord {
        time_s: t,
        pose: Some(PoseRecord {
            position_m: [0.05 * t, 0.01 * libm::sin(t), 0.002 * t],
            orientation_wxyz: [libm::cos(0.01 * t), 0.0, 0.0, libm::sin(0.01 * t)],
            position_sigma_m: 0.01 + 1e-6 * t,
            attitude_sigma_rad: 0.002,
        }),
        joints: Some(
            (0..joints)
                .map(|k| {
                    let k = f64::from(u32::try_from(k).unwrap_or(0));
                    JointRecord {
                        pitch_rad: 0.1 * libm::sin(t + k),
                        yaw_rad: 0.2 * libm::cos(0.5 * t + k),
                    }
                })
                .collect(),
        ),
        port_pressures_pa: Some(
            (0..ports)
                .map(|k| {
                    let k = f64::from(u32::try_from(k).unwrap_or(0));
                    101_325.0 + 40.0 * libm::cos(k + 0.1 * t)
                })
                .collect(),
        ),
        total_temperature_k: Some(300.0 + 0.001 * t),
        contacts: (0..contacts)
            .map(|k| ContactRecord {
                module: u16::try_from(k % 9).unwrap_or(0),
                sensor: u16::try_from(k % 4).unwrap_or(0),
                force_n: 1.0 + 0.5 * libm::sin(t * 3.0 + f64::from(u32::try_from(k).unwrap_or(0))),
                normal_module: (k % 2 == 0).then_some([0.0, 0.6, 0.8]),
            })
            .collect(),
        contacts_reported: true,
    }
}

/// Sizes and speeds of one write-then-read of synthetic frames.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Throughput {
    /// Frames written and read back.
    pub frames: u64,
    /// Log size, bytes (header and end record included).
    pub bytes: u64,
    /// Bytes of one frame record on disk (frame header included), averaged.
    pub bytes_per_frame: f64,
    /// Wall time to encode and write, s.
    pub write_s: f64,
    /// Wall time to read and decode, s.
    pub read_s: f64,
}

/// Write `n` synthetic 7-port, 8-joint, 8-contact frames to memory, read
/// them back, and time both (the read timing is decoding only). A second,
/// untimed pass checks every frame read against the one written (a
/// mismatch is an [`LogError::Encode`]).
///
/// # Errors
/// Any [`LogError`] from writing or reading.
pub fn throughput(n: u32) -> Result<Throughput, LogError> {
    let header = demo_header(9);
    let frames: Vec<FrameRecord> = (0..64).map(|i| synthetic_frame(i, 7, 8, 8)).collect();
    let start = Instant::now();
    let mut w = LogWriter::new(Vec::new(), &header)?;
    let after_header = w.bytes_written();
    for i in 0..n {
        w.write_frame(&frames[(i % 64) as usize])?;
    }
    let frame_bytes = w.bytes_written() - after_header;
    let bytes = w.finish("synthetic")?;
    let write_s = start.elapsed().as_secs_f64();

    // Timed pass: read and decode only.
    let start = Instant::now();
    let mut r = LogReader::open(Cursor::new(&bytes), ReadOptions::default())?;
    let mut got = 0u32;
    while let Some(rec) = r.next_record()? {
        if let Record::Frame(f) = std::hint::black_box(rec) {
            std::hint::black_box(&f);
            got += 1;
        }
    }
    let read_s = start.elapsed().as_secs_f64();
    // Check pass, untimed: every frame read back equals the one written.
    let r = LogReader::open(Cursor::new(&bytes), ReadOptions::default())?;
    let mut i = 0u32;
    for rec in r {
        if let Record::Frame(f) = rec? {
            if f != frames[(i % 64) as usize] {
                return Err(LogError::Encode {
                    what: "frame",
                    message: format!("frame {i} read back differs"),
                });
            }
            i += 1;
        }
    }
    #[allow(clippy::cast_precision_loss)]
    let bytes_per_frame = frame_bytes as f64 / f64::from(n.max(1));
    Ok(Throughput {
        frames: u64::from(got),
        bytes: bytes.len() as u64,
        bytes_per_frame,
        write_s,
        read_s,
    })
}
