//! Streaming log writer.

use std::io::Write;

use super::codec::{self, CodecError};
use super::format::{self, FrameHead};
use super::{EndRecord, EventRecord, LogError, LogHeader, Record};
use crate::record::FrameRecord;

/// Writes a log to any [`Write`]: header at construction, then one framed
/// record per call. Call [`LogWriter::finish`] to append the end record; a
/// log without one reads back as truncated.
///
/// Wrap a file in a `BufWriter`: each record is one `write_all` call.
#[derive(Debug)]
pub struct LogWriter<W: Write> {
    out: W,
    offset: u64,
    seq: u32,
    overflowed: bool,
    payload: Vec<u8>,
    frames: u64,
    events: u64,
    first_time_s: Option<f64>,
    last_time_s: Option<f64>,
}

fn io_err(offset: u64) -> impl FnOnce(std::io::Error) -> LogError {
    move |source| LogError::Io { offset, source }
}

fn enc_err(what: &'static str) -> impl FnOnce(CodecError) -> LogError {
    move |e| LogError::Encode {
        what,
        message: e.message,
    }
}

impl<W: Write> LogWriter<W> {
    /// Write the file header and return a writer positioned for records.
    ///
    /// # Errors
    /// [`LogError::Encode`] if the header holds a NaN or infinite float (the
    /// header is JSON), [`LogError::Io`] if writing fails.
    pub fn new(mut out: W, header: &LogHeader) -> Result<Self, LogError> {
        let text = codec::encode_header(header).map_err(enc_err("header"))?;
        let len = u32::try_from(text.len()).map_err(|_| LogError::Encode {
            what: "header",
            message: "header over 4 GiB".to_owned(),
        })?;
        let mut prefix = [0u8; format::FILE_PREFIX_BYTES];
        prefix[0..8].copy_from_slice(&format::MAGIC);
        prefix[8..10].copy_from_slice(&format::VERSION.to_le_bytes());
        prefix[10..12].copy_from_slice(&0u16.to_le_bytes());
        prefix[12..16].copy_from_slice(&len.to_le_bytes());
        prefix[16..20].copy_from_slice(&crc32fast::hash(&text).to_le_bytes());
        out.write_all(&prefix).map_err(io_err(0))?;
        out.write_all(&text).map_err(io_err(20))?;
        Ok(Self {
            out,
            offset: 20 + u64::from(len),
            seq: 0,
            overflowed: false,
            payload: Vec::with_capacity(1024),
            frames: 0,
            events: 0,
            first_time_s: None,
            last_time_s: None,
        })
    }

    /// Bytes written so far (header included).
    #[must_use]
    pub fn bytes_written(&self) -> u64 {
        self.offset
    }

    /// Records written so far.
    #[must_use]
    pub fn records_written(&self) -> u64 {
        if self.overflowed {
            1 << 32
        } else {
            u64::from(self.seq)
        }
    }

    /// Append a sensor frame.
    ///
    /// # Errors
    /// [`LogError::Io`] if writing fails, [`LogError::SequenceOverflow`]
    /// after 2^32 records.
    pub fn write_frame(&mut self, frame: &FrameRecord) -> Result<(), LogError> {
        self.payload.clear();
        codec::encode_payload(frame, &mut self.payload).map_err(enc_err("frame"))?;
        self.emit(format::KIND_FRAME)?;
        self.frames += 1;
        if self.first_time_s.is_none() {
            self.first_time_s = Some(frame.time_s);
        }
        self.last_time_s = Some(frame.time_s);
        Ok(())
    }

    /// Append an event.
    ///
    /// # Errors
    /// As [`LogWriter::write_frame`].
    pub fn write_event(&mut self, event: &EventRecord) -> Result<(), LogError> {
        self.payload.clear();
        codec::encode_payload(event, &mut self.payload).map_err(enc_err("event"))?;
        self.emit(format::KIND_EVENT)?;
        self.events += 1;
        Ok(())
    }

    /// Append a frame or an event (an end record finishes nothing here:
    /// use [`LogWriter::finish`]; passing one is written as given, which is
    /// how tests make logs with early end records).
    ///
    /// # Errors
    /// As [`LogWriter::write_frame`].
    pub fn write(&mut self, record: &Record) -> Result<(), LogError> {
        match record {
            Record::Frame(f) => self.write_frame(f),
            Record::Event(e) => self.write_event(e),
            Record::End(e) => {
                self.payload.clear();
                codec::encode_payload(e, &mut self.payload).map_err(enc_err("end"))?;
                self.emit(format::KIND_END)
            }
        }
    }

    /// Append a frame of any kind byte with a raw payload (for tests of
    /// readers against kinds they do not know).
    ///
    /// # Errors
    /// As [`LogWriter::write_frame`].
    pub fn write_raw(&mut self, kind: u8, payload: &[u8]) -> Result<(), LogError> {
        self.payload.clear();
        self.payload.extend_from_slice(payload);
        self.emit(kind)
    }

    fn emit(&mut self, kind: u8) -> Result<(), LogError> {
        if self.overflowed {
            return Err(LogError::SequenceOverflow);
        }
        let len = u32::try_from(self.payload.len()).map_err(|_| LogError::Encode {
            what: "record",
            message: "payload over 4 GiB".to_owned(),
        })?;
        let head = format::encode_head(&FrameHead {
            len,
            seq: self.seq,
            kind,
            crc: crc32fast::hash(&self.payload),
        });
        self.out.write_all(&head).map_err(io_err(self.offset))?;
        self.out
            .write_all(&self.payload)
            .map_err(io_err(self.offset))?;
        self.offset += u64::try_from(head.len() + self.payload.len()).unwrap_or(u64::MAX);
        match self.seq.checked_add(1) {
            Some(s) => self.seq = s,
            None => self.overflowed = true,
        }
        Ok(())
    }

    /// Append the end record (with the counts and time span written), flush,
    /// and hand back the inner writer.
    ///
    /// # Errors
    /// As [`LogWriter::write_frame`], or a flush failure.
    pub fn finish(mut self, note: &str) -> Result<W, LogError> {
        let end = EndRecord {
            frames: self.frames,
            events: self.events,
            first_time_s: self.first_time_s,
            last_time_s: self.last_time_s,
            note: note.to_owned(),
        };
        self.write(&Record::End(end))?;
        self.out.flush().map_err(io_err(self.offset))?;
        Ok(self.out)
    }
}
