//! The one module that names bincode, and the header's JSON text.
//!
//! Record payloads are bincode 2 through serde, standard configuration
//! (little-endian, variable-length integers), with a decode limit so that a
//! damaged length prefix inside a payload can never make the decoder
//! allocate more than [`DECODE_LIMIT_BYTES`]. Floats are written as their
//! 8 raw IEEE-754 bytes, so every bit pattern (NaN payloads, `-0.0`)
//! survives a round trip.
//!
//! The file header is JSON text (UTF-8): the configuration types use
//! internally tagged enums, which need a self-describing format, and the
//! header is read once per file, so its size and speed do not matter.
//! serde_json is built with `float_roundtrip` so that every finite float in
//! the header comes back bit for bit.

use bincode::config::{self, Configuration, Limit, LittleEndian, Varint};
use serde::de::DeserializeOwned;
use serde::{Deserialize, Serialize};

use super::LogHeader;
use crate::record::{ContactRecord, FrameRecord, JointRecord, PoseRecord};

/// Largest amount a single payload decode may claim for its containers
/// (strings, vectors), bytes. Also the hard ceiling on the configurable
/// maximum record size.
pub const DECODE_LIMIT_BYTES: usize = 16 << 20;

type Cfg = Configuration<LittleEndian, Varint, Limit<DECODE_LIMIT_BYTES>>;

fn cfg() -> Cfg {
    config::standard().with_limit::<DECODE_LIMIT_BYTES>()
}

/// A payload that could not be encoded or decoded; the message is the
/// codec's own.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct CodecError {
    /// What went wrong, in the codec's words.
    pub message: String,
}

impl std::fmt::Display for CodecError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.message)
    }
}

impl std::error::Error for CodecError {}

/// Append the payload encoding of `value` to `out`.
///
/// # Errors
/// [`CodecError`] if serde refuses the value (never for the record types of
/// this crate).
pub fn encode_payload<T: Serialize>(value: &T, out: &mut Vec<u8>) -> Result<(), CodecError> {
    bincode::serde::encode_into_std_write(value, out, cfg())
        .map(|_| ())
        .map_err(|e| CodecError {
            message: e.to_string(),
        })
}

/// Decode a whole payload; trailing bytes are an error.
///
/// # Errors
/// [`CodecError`] for malformed bytes, a claim over the decode limit, or
/// bytes left over after the value.
pub fn decode_payload<T: DeserializeOwned>(bytes: &[u8]) -> Result<T, CodecError> {
    let (value, used) =
        bincode::serde::decode_from_slice::<T, _>(bytes, cfg()).map_err(|e| CodecError {
            message: e.to_string(),
        })?;
    if used == bytes.len() {
        Ok(value)
    } else {
        Err(CodecError {
            message: format!("{} bytes left over after the value", bytes.len() - used),
        })
    }
}

/// Frame payloads up to this size may take the direct decoder
/// ([`decode_frame_payload`]); a real frame is a few hundred bytes.
pub const DIRECT_FRAME_MAX_BYTES: usize = 256 << 10;

/// Decode a frame payload: the same result as
/// `decode_payload::<FrameRecord>` (value or error), faster.
///
/// A direct reader of the standard layout (fields in order, floats as 8
/// little-endian bytes, `Option` as a 0/1 byte, integers and lengths as
/// varints) takes the payloads it fully understands: canonical varints,
/// every byte used, each length within the bytes left. Anything else goes
/// through [`decode_payload`], so a damaged payload gets the codec's own
/// verdict and message.
///
/// # Errors
/// As [`decode_payload`].
pub fn decode_frame_payload(bytes: &[u8]) -> Result<FrameRecord, CodecError> {
    if bytes.len() <= DIRECT_FRAME_MAX_BYTES
        && let Some(frame) = direct_frame(bytes)
    {
        return Ok(frame);
    }
    decode_payload(bytes)
}

/// A frame payload of format version 1: the fields of [`FrameRecord`]
/// without the contact heartbeat, in the same order.
#[derive(Deserialize)]
struct FrameRecordV1 {
    time_s: f64,
    pose: Option<PoseRecord>,
    joints: Option<Vec<JointRecord>>,
    port_pressures_pa: Option<Vec<f64>>,
    total_temperature_k: Option<f64>,
    contacts: Vec<ContactRecord>,
}

/// Decode a frame payload written by format `version` (1 or 2; see
/// [`super::format::VERSION`]). A version 1 frame reads with
/// `contacts_reported = true`.
///
/// # Errors
/// As [`decode_payload`].
pub fn decode_frame_payload_version(bytes: &[u8], version: u16) -> Result<FrameRecord, CodecError> {
    if version >= 2 {
        return decode_frame_payload(bytes);
    }
    if bytes.len() <= DIRECT_FRAME_MAX_BYTES
        && let Some(frame) = direct_frame_layout(bytes, false)
    {
        return Ok(frame);
    }
    let v1: FrameRecordV1 = decode_payload(bytes)?;
    Ok(FrameRecord {
        time_s: v1.time_s,
        pose: v1.pose,
        joints: v1.joints,
        port_pressures_pa: v1.port_pressures_pa,
        total_temperature_k: v1.total_temperature_k,
        contacts: v1.contacts,
        contacts_reported: true,
    })
}

/// The direct reader of [`decode_frame_payload`]; `None` for anything it
/// does not take.
pub fn direct_frame(bytes: &[u8]) -> Option<FrameRecord> {
    direct_frame_layout(bytes, true)
}

/// The direct reader, for the current layout (`heartbeat`: the trailing
/// contact-heartbeat flag) or the version 1 layout (without it).
fn direct_frame_layout(bytes: &[u8], heartbeat: bool) -> Option<FrameRecord> {
    let mut c = Cursor { bytes };
    let time_s = c.f64()?;
    let pose = if c.flag()? {
        Some(PoseRecord {
            position_m: [c.f64()?, c.f64()?, c.f64()?],
            orientation_wxyz: [c.f64()?, c.f64()?, c.f64()?, c.f64()?],
            position_sigma_m: c.f64()?,
            attitude_sigma_rad: c.f64()?,
        })
    } else {
        None
    };
    let joints = if c.flag()? {
        let n = c.len(16)?;
        let mut v = Vec::with_capacity(n);
        for _ in 0..n {
            v.push(JointRecord {
                pitch_rad: c.f64()?,
                yaw_rad: c.f64()?,
            });
        }
        Some(v)
    } else {
        None
    };
    let port_pressures_pa = if c.flag()? {
        let n = c.len(8)?;
        let mut v = Vec::with_capacity(n);
        for _ in 0..n {
            v.push(c.f64()?);
        }
        Some(v)
    } else {
        None
    };
    let total_temperature_k = if c.flag()? { Some(c.f64()?) } else { None };
    // A contact is at least 11 bytes: two one-byte varints, a float, a flag.
    let n = c.len(11)?;
    let mut contacts = Vec::with_capacity(n);
    for _ in 0..n {
        contacts.push(ContactRecord {
            module: c.u16()?,
            sensor: c.u16()?,
            force_n: c.f64()?,
            normal_module: if c.flag()? {
                Some([c.f64()?, c.f64()?, c.f64()?])
            } else {
                None
            },
        });
    }
    let contacts_reported = if heartbeat { c.flag()? } else { true };
    c.bytes.is_empty().then_some(FrameRecord {
        time_s,
        pose,
        joints,
        port_pressures_pa,
        total_temperature_k,
        contacts,
        contacts_reported,
    })
}

/// Varint markers of the standard configuration: a first byte up to 250
/// is the value; 251 and 252 announce a little-endian `u16` and `u32`.
const VARINT_ONE_BYTE_MAX: u8 = 250;
const VARINT_U16: u8 = 251;
const VARINT_U32: u8 = 252;

struct Cursor<'a> {
    bytes: &'a [u8],
}

impl Cursor<'_> {
    fn take<const N: usize>(&mut self) -> Option<[u8; N]> {
        let (head, rest) = self.bytes.split_first_chunk::<N>()?;
        self.bytes = rest;
        Some(*head)
    }

    fn f64(&mut self) -> Option<f64> {
        self.take::<8>().map(f64::from_le_bytes)
    }

    fn flag(&mut self) -> Option<bool> {
        match self.take::<1>()? {
            [0] => Some(false),
            [1] => Some(true),
            _ => None,
        }
    }

    /// A canonical varint up to `u32`.
    fn varint(&mut self) -> Option<u32> {
        match self.take::<1>()? {
            [b] if b <= VARINT_ONE_BYTE_MAX => Some(u32::from(b)),
            [VARINT_U16] => {
                let v = u16::from_le_bytes(self.take::<2>()?);
                (v > u16::from(VARINT_ONE_BYTE_MAX)).then_some(u32::from(v))
            }
            [VARINT_U32] => {
                let v = u32::from_le_bytes(self.take::<4>()?);
                (v > u32::from(u16::MAX)).then_some(v)
            }
            _ => None,
        }
    }

    fn u16(&mut self) -> Option<u16> {
        self.varint().and_then(|v| u16::try_from(v).ok())
    }

    /// A sequence length whose elements, at least `min_element_bytes`
    /// each, fit in the bytes left.
    fn len(&mut self, min_element_bytes: usize) -> Option<usize> {
        let n = usize::try_from(self.varint()?).ok()?;
        (n.checked_mul(min_element_bytes)? <= self.bytes.len()).then_some(n)
    }
}

/// The header section's bytes (JSON text).
///
/// # Errors
/// [`CodecError`] if the header holds a value JSON cannot carry (a NaN or
/// infinite float): the text is read back and must give the same header.
pub fn encode_header(header: &LogHeader) -> Result<Vec<u8>, CodecError> {
    let text = serde_json::to_vec(header).map_err(|e| CodecError {
        message: e.to_string(),
    })?;
    // serde_json writes NaN and infinities as `null`, which would make the
    // header unreadable: read it back and insist on the same header.
    match decode_header(&text) {
        Ok(back) if &back == header => Ok(text),
        _ => Err(CodecError {
            message: "the header holds a NaN or infinite float, which JSON cannot carry".to_owned(),
        }),
    }
}

/// Parse the header section.
///
/// # Errors
/// [`CodecError`] for text that is not a header.
pub fn decode_header(bytes: &[u8]) -> Result<LogHeader, CodecError> {
    serde_json::from_slice(bytes).map_err(|e| CodecError {
        message: e.to_string(),
    })
}
