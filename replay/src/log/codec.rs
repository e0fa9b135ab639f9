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
use serde::Serialize;
use serde::de::DeserializeOwned;

use super::LogHeader;

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
