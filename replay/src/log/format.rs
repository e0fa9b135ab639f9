//! Byte layout constants and the fixed-size frame header (see
//! `replay/LOGFORMAT.md`).

/// File magic: the first 8 bytes of every log.
pub const MAGIC: [u8; 8] = *b"UPCURLOG";
/// The format version this code writes (and the newest it reads).
/// Version 2 added the contact channel's heartbeat to frame payloads
/// (`FrameRecord::contacts_reported`, one flag byte at the end).
pub const VERSION: u16 = 2;
/// The oldest format version this code reads. Version 1 frame payloads
/// have no heartbeat flag; their frames read with `contacts_reported =
/// true` (what a version 1 reader assumed of a frame without contacts).
pub const OLDEST_READ_VERSION: u16 = 1;
/// Size of the fixed part of the file header (magic, version, flags,
/// header length, header CRC), bytes.
pub const FILE_PREFIX_BYTES: usize = 20;
/// Offset of the version field.
pub const VERSION_OFFSET: u64 = 8;
/// Offset of the flags field.
pub const FLAGS_OFFSET: u64 = 10;
/// Offset of the header length field (damage to the header section is
/// reported here).
pub const HEADER_LEN_OFFSET: u64 = 12;

/// The marker that starts every frame; salvage scans for it.
pub const SYNC: [u8; 4] = [0xE7, 0x5A, 0x1D, 0xB3];
/// Size of a frame header, bytes.
pub const FRAME_HEADER_BYTES: usize = 20;

/// Record kind byte: sensor frame.
pub const KIND_FRAME: u8 = 1;
/// Record kind byte: event or annotation.
pub const KIND_EVENT: u8 = 2;
/// Record kind byte: end of log, with a summary.
pub const KIND_END: u8 = 3;

/// A parsed, checked frame header.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct FrameHead {
    /// Payload length, bytes.
    pub len: u32,
    /// Sequence number of the record (0-based, every record counts).
    pub seq: u32,
    /// Record kind byte.
    pub kind: u8,
    /// CRC-32 of the payload.
    pub crc: u32,
}

/// Why 20 bytes are not a frame header.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum HeadFault {
    /// The sync marker is not there.
    NoSync,
    /// The header check does not match, or the flags byte is not zero.
    Check,
}

/// 16-bit header check over the length, sequence, kind and flags bytes:
/// the low half of their CRC-32. Every single-byte error in those bytes
/// changes it (checked exhaustively by a test).
#[must_use]
pub fn header_check(fields: &[u8]) -> u16 {
    let c = crc32fast::hash(fields);
    u16::try_from(c & 0xFFFF).unwrap_or(0)
}

/// Lay out a frame header.
#[must_use]
pub fn encode_head(h: &FrameHead) -> [u8; FRAME_HEADER_BYTES] {
    let mut out = [0u8; FRAME_HEADER_BYTES];
    out[0..4].copy_from_slice(&SYNC);
    out[4..8].copy_from_slice(&h.len.to_le_bytes());
    out[8..12].copy_from_slice(&h.seq.to_le_bytes());
    out[12] = h.kind;
    out[13] = 0;
    let check = header_check(&out[4..14]);
    out[14..16].copy_from_slice(&check.to_le_bytes());
    out[16..20].copy_from_slice(&h.crc.to_le_bytes());
    out
}

fn u32_at(b: &[u8], at: usize) -> u32 {
    let mut a = [0u8; 4];
    if let Some(s) = b.get(at..at + 4) {
        a.copy_from_slice(s);
    }
    u32::from_le_bytes(a)
}

/// Parse and check a frame header (the first 20 bytes of `b`).
///
/// # Errors
/// [`HeadFault`] when the bytes are not a valid frame header.
pub fn decode_head(b: &[u8]) -> Result<FrameHead, HeadFault> {
    let Some(b) = b.get(..FRAME_HEADER_BYTES) else {
        return Err(HeadFault::NoSync);
    };
    if b[0..4] != SYNC {
        return Err(HeadFault::NoSync);
    }
    let stored = u16::from_le_bytes([b[14], b[15]]);
    if b[13] != 0 || header_check(&b[4..14]) != stored {
        return Err(HeadFault::Check);
    }
    Ok(FrameHead {
        len: u32_at(b, 4),
        seq: u32_at(b, 8),
        kind: b[12],
        crc: u32_at(b, 16),
    })
}
