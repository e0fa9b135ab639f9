//! The Upcurrent log: a header, then framed records, written and read as a
//! stream. The byte layout is documented in `replay/LOGFORMAT.md`.
//!
//! - [`LogWriter`] writes a header and records to any `Write`; `finish`
//!   appends the end record.
//! - [`LogReader`] reads one record at a time from any `Read`, in bounded
//!   memory. In strict mode the first damage is an error; in salvage mode
//!   damaged stretches are skipped, listed ([`Damage`]) and counted
//!   ([`SalvageStats`]), and reading goes on.
//! - [`inspect()`] summarises a log: header, counts, time span and gaps,
//!   sensor health, damage.
//!
//! All bincode use sits in [`codec`].

pub mod codec;
pub mod format;
mod inspect;
mod reader;
pub mod synth;
mod writer;

#[cfg(test)]
mod tests;

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};

use crate::record::{FrameRecord, GasSpec, RobotSpec};

pub use inspect::{InspectReport, KindCounts, SensorHealth, TimeStats, inspect};
pub use reader::{LogReader, ReadOptions, SalvageStats};
pub use writer::LogWriter;

/// Everything a replay needs besides the records: what robot, what gas, how
/// the navigator was set up, in which units, and where the log came from.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LogHeader {
    /// The robot as configured (modules, sensors, probe).
    pub robot: RobotSpec,
    /// The gas as configured.
    pub gas: GasSpec,
    /// Navigator settings, opaque to the log: whatever the navigator's own
    /// configuration serialises to (JSON value; `null` if none).
    pub navigator_config: serde_json::Value,
    /// Nominal time between sensor frames, s, if the source had one.
    pub frame_period_s: Option<f64>,
    /// Unit of each physical quantity in the records (quantity to unit
    /// symbol). Records are SI; see [`LogHeader::si_units`].
    pub units: BTreeMap<String, String>,
    /// Free-form provenance: who or what made the log, from what, with which
    /// seed or rig. Keys sorted, so the header bytes are deterministic.
    pub provenance: BTreeMap<String, String>,
}

impl LogHeader {
    /// A header with SI units, no navigator settings and no provenance.
    #[must_use]
    pub fn new(robot: RobotSpec, gas: GasSpec) -> Self {
        Self {
            robot,
            gas,
            navigator_config: serde_json::Value::Null,
            frame_period_s: None,
            units: Self::si_units(),
            provenance: BTreeMap::new(),
        }
    }

    /// The units the record types use.
    #[must_use]
    pub fn si_units() -> BTreeMap<String, String> {
        [
            ("time", "s"),
            ("length", "m"),
            ("angle", "rad"),
            ("pressure", "Pa"),
            ("force", "N"),
            ("temperature", "K"),
        ]
        .into_iter()
        .map(|(q, u)| (q.to_owned(), u.to_owned()))
        .collect()
    }
}

/// Something that happened during a recording, other than a sensor frame.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub enum Event {
    /// A fault was injected into a channel (simulation) or observed (rig).
    FaultInjected {
        /// The channel, e.g. `port 3` or `contact 2/5`.
        channel: String,
        /// What the fault is, e.g. `stuck 101000 Pa`.
        fault: String,
    },
    /// A fault ended.
    FaultCleared {
        /// The channel.
        channel: String,
    },
    /// A ground-truth marker: a known place or value at this time.
    Truth {
        /// What is marked, e.g. `junction 2`, `source`.
        label: String,
        /// True head position, map frame, m, if known.
        position_m: Option<[f64; 3]>,
        /// An associated value (e.g. true standoff, m), if any.
        value: Option<f64>,
    },
    /// Free text.
    Note {
        /// The text.
        text: String,
    },
}

/// An event with its time.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EventRecord {
    /// Time, s (same clock as the frames).
    pub time_s: f64,
    /// What happened.
    pub event: Event,
}

/// The last record of a complete log, written by [`LogWriter::finish`].
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EndRecord {
    /// Frame records written.
    pub frames: u64,
    /// Event records written.
    pub events: u64,
    /// Time of the first frame, s.
    pub first_time_s: Option<f64>,
    /// Time of the last frame, s.
    pub last_time_s: Option<f64>,
    /// Why the recording stopped, or any closing remark.
    pub note: String,
}

/// One record of a log.
#[derive(Debug, Clone, PartialEq)]
pub enum Record {
    /// A sensor frame.
    Frame(FrameRecord),
    /// An event or annotation.
    Event(EventRecord),
    /// The end of the log.
    End(EndRecord),
}

/// What is wrong at a place in a log.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub enum DamageKind {
    /// The file does not start with the log magic.
    BadMagic {
        /// The first bytes found (zero-padded if the file is shorter).
        found: [u8; 8],
    },
    /// The format version is not one this code reads.
    UnsupportedVersion {
        /// Version in the file.
        found: u16,
        /// Version this code reads.
        supported: u16,
    },
    /// The header section is unusable (reserved flags set, length over the
    /// limit, CRC mismatch, or text that is not a header).
    BadHeader {
        /// What is wrong.
        reason: String,
    },
    /// The file ends inside a record, or at a record boundary without an
    /// end record.
    Truncated {
        /// Bytes of the incomplete record present (0: cut at a boundary).
        partial_bytes: u64,
    },
    /// No frame starts where one should (sync marker missing).
    LostSync,
    /// A frame header whose check does not match.
    BadFrameHeader,
    /// A frame claims a payload longer than the reader accepts.
    TooLong {
        /// Claimed payload length, bytes.
        len: u32,
        /// The reader's limit, bytes.
        max: u32,
    },
    /// The payload does not match its CRC-32.
    BadCrc {
        /// CRC in the frame header.
        stored: u32,
        /// CRC of the bytes read.
        computed: u32,
    },
    /// An intact frame of a kind this code does not know.
    UnknownKind {
        /// The kind byte.
        kind: u8,
    },
    /// An intact frame whose payload does not decode as its kind.
    Undecodable {
        /// The kind byte.
        kind: u8,
        /// The codec's message.
        reason: String,
    },
    /// An intact frame whose sequence number is not the next one.
    OutOfSequence {
        /// Sequence number expected.
        expected: u64,
        /// Sequence number found.
        found: u64,
    },
    /// Intact records whose sequence numbers were already read: a block
    /// repeated in the file. Salvage skips them (nothing is lost).
    Duplicate {
        /// First repeated sequence number.
        first_seq: u64,
        /// Consecutive repeated records at this place.
        records: u64,
    },
    /// Bytes after the end record.
    AfterEnd,
}

/// One place where a log is damaged.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Damage {
    /// Byte offset from the start of the file where the damaged part starts
    /// (a frame's first byte, or the header field at fault).
    pub offset: u64,
    /// Index of the record affected: the sequence number the next record
    /// should have had (equal to the count of records read before it in a
    /// log without earlier damage).
    pub record_index: u64,
    /// What is wrong.
    pub kind: DamageKind,
    /// Bytes skipped by salvage from `offset` to the next good frame (or the
    /// end of the file); 0 in strict mode.
    pub skipped_bytes: u64,
}

impl DamageKind {
    /// Whether this is damage to the file header (magic, version, header
    /// section), which leaves nothing after it readable.
    #[must_use]
    pub fn is_file_header(&self) -> bool {
        matches!(
            self,
            Self::BadMagic { .. } | Self::UnsupportedVersion { .. } | Self::BadHeader { .. }
        )
    }
}

impl std::fmt::Display for DamageKind {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Self::BadMagic { found } => write!(f, "not an Upcurrent log (magic {found:02x?})"),
            Self::UnsupportedVersion { found, supported } => {
                write!(
                    f,
                    "format version {found}, this reader reads versions {} to {supported}",
                    format::OLDEST_READ_VERSION
                )
            }
            Self::BadHeader { reason } => write!(f, "bad header: {reason}"),
            Self::Truncated { partial_bytes: 0 } => {
                f.write_str("truncated tail: file ends without an end record")
            }
            Self::Truncated { partial_bytes } => {
                write!(
                    f,
                    "truncated tail: {partial_bytes} bytes of an incomplete record"
                )
            }
            Self::LostSync => f.write_str("no frame marker where a frame should start"),
            Self::BadFrameHeader => f.write_str("frame header check mismatch"),
            Self::TooLong { len, max } => {
                write!(f, "frame claims {len} payload bytes, limit is {max}")
            }
            Self::BadCrc { stored, computed } => {
                write!(f, "bad CRC (stored {stored:08x}, computed {computed:08x})")
            }
            Self::UnknownKind { kind } => write!(f, "unknown record kind {kind}"),
            Self::Undecodable { kind, reason } => {
                write!(f, "record of kind {kind} does not decode: {reason}")
            }
            Self::OutOfSequence { expected, found } => {
                write!(f, "sequence number {found}, expected {expected}")
            }
            Self::Duplicate { first_seq, records } => write!(
                f,
                "{records} repeated record(s), sequence numbers {first_seq}..={} already read",
                first_seq + records.saturating_sub(1)
            ),
            Self::AfterEnd => f.write_str("bytes after the end record"),
        }
    }
}

impl std::fmt::Display for Damage {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "byte {}, record {}: {}",
            self.offset, self.record_index, self.kind
        )?;
        if self.skipped_bytes > 0 {
            write!(f, " ({} bytes skipped)", self.skipped_bytes)?;
        }
        Ok(())
    }
}

/// Why a log could not be written or read.
#[derive(Debug)]
pub enum LogError {
    /// The log is damaged (strict mode, or header damage in any mode).
    Damaged(Damage),
    /// The underlying reader or writer failed.
    Io {
        /// Byte offset reached when it failed.
        offset: u64,
        /// The I/O error.
        source: std::io::Error,
    },
    /// A value could not be encoded (writer side).
    Encode {
        /// What was being written.
        what: &'static str,
        /// The codec's message.
        message: String,
    },
    /// More records than the 32-bit sequence number can count.
    SequenceOverflow,
}

impl std::fmt::Display for LogError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Self::Damaged(d) if d.kind.is_file_header() => {
                write!(f, "file header damaged at byte {}: {}", d.offset, d.kind)
            }
            Self::Damaged(d) => write!(f, "damaged log at {d}"),
            Self::Io { offset, source } => write!(f, "I/O error at byte {offset}: {source}"),
            Self::Encode { what, message } => write!(f, "cannot encode {what}: {message}"),
            Self::SequenceOverflow => f.write_str("more than 2^32 records in one log"),
        }
    }
}

impl std::error::Error for LogError {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match self {
            Self::Io { source, .. } => Some(source),
            _ => None,
        }
    }
}

impl LogError {
    /// The damage report, if this is damage.
    #[must_use]
    pub fn damage(&self) -> Option<&Damage> {
        match self {
            Self::Damaged(d) => Some(d),
            _ => None,
        }
    }
}

/// Feed arbitrary bytes to the reader in both modes and drain it; the fuzz
/// target and the "any bytes" property test call this. Returns the number
/// of records read in (strict, salvage) mode. Never panics.
#[must_use]
pub fn read_any(bytes: &[u8], max_record_bytes: u32) -> (u64, u64) {
    let mut counts = [0u64; 2];
    for (slot, salvage) in counts.iter_mut().zip([false, true]) {
        let opts = ReadOptions {
            max_record_bytes,
            max_header_bytes: max_record_bytes,
            salvage,
        };
        if let Ok(mut r) = LogReader::open(bytes, opts) {
            while let Ok(Some(_)) = r.next_record() {
                *slot += 1;
            }
        }
    }
    (counts[0], counts[1])
}
