//! Streaming log reader, strict or salvaging.

use std::io::Read;

use super::codec::{self, DECODE_LIMIT_BYTES};
use super::format::{self, FRAME_HEADER_BYTES, FrameHead, HeadFault};
use super::{Damage, DamageKind, LogError, LogHeader, Record};

/// Bytes asked of the source per read call.
const CHUNK: usize = 64 * 1024;

/// How a [`LogReader`] reads.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct ReadOptions {
    /// Longest record payload accepted, bytes. A frame claiming more is
    /// damage ([`DamageKind::TooLong`]). Clamped to
    /// [`codec::DECODE_LIMIT_BYTES`].
    pub max_record_bytes: u32,
    /// Longest header section accepted, bytes. Clamped likewise.
    pub max_header_bytes: u32,
    /// Skip damaged stretches and go on (true), or stop at the first damage
    /// with an error (false). Header damage stops both.
    pub salvage: bool,
}

impl Default for ReadOptions {
    /// Strict, 1 MiB records, 1 MiB header.
    fn default() -> Self {
        Self {
            max_record_bytes: 1 << 20,
            max_header_bytes: 1 << 20,
            salvage: false,
        }
    }
}

impl ReadOptions {
    /// The defaults, in salvage mode.
    #[must_use]
    pub fn salvage() -> Self {
        Self {
            salvage: true,
            ..Self::default()
        }
    }
}

/// What salvage skipped, so far.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, serde::Serialize)]
pub struct SalvageStats {
    /// Records returned.
    pub records_read: u64,
    /// Damaged places found (each is one [`Damage`], listed or not).
    pub damaged_places: u64,
    /// Bytes skipped over damaged places.
    pub bytes_skipped: u64,
    /// Records known lost: sequence numbers skipped between good records,
    /// plus intact records of unknown kinds that were passed over. Records
    /// lost in a damaged tail with no good record after it are not counted
    /// (the end record, when present, gives the totals written).
    pub records_lost: u64,
    /// Damage reports not kept because [`LogReader::MAX_LISTED_DAMAGE`] were
    /// already listed.
    pub damage_not_listed: u64,
    /// Intact records skipped because their sequence number was already
    /// read (a repeated block; [`DamageKind::Duplicate`]). Not lost.
    pub duplicates_skipped: u64,
}

/// Reads a log from any [`Read`], one record at a time, in memory bounded by
/// the largest record accepted plus 64 KiB (whatever the log's length).
///
/// The header is read and checked by [`LogReader::open`]. Each call to
/// [`LogReader::next_record`] returns the next good record, `Ok(None)` at
/// the end. In strict mode, the first damage is returned as
/// [`LogError::Damaged`] and reading stops; records already returned stay
/// valid. In salvage mode damage is listed ([`LogReader::damage`]) and the
/// reader resynchronises on the next frame marker with a valid header.
#[derive(Debug)]
pub struct LogReader<R: Read> {
    input: Input<R>,
    opts: ReadOptions,
    header: LogHeader,
    header_bytes: u64,
    version: u16,
    expected_seq: u64,
    after_damage: bool,
    saw_end: bool,
    done: bool,
    last_offset: u64,
    damage: Vec<Damage>,
    stats: SalvageStats,
}

impl<R: Read> LogReader<R> {
    /// Most damage reports kept in [`LogReader::damage`]; further ones are
    /// only counted.
    pub const MAX_LISTED_DAMAGE: usize = 10_000;

    /// Read and check the file header.
    ///
    /// # Errors
    /// [`LogError::Damaged`] with [`DamageKind::BadMagic`],
    /// [`DamageKind::UnsupportedVersion`], [`DamageKind::BadHeader`] or
    /// [`DamageKind::Truncated`] (in either mode); [`LogError::Io`].
    pub fn open(src: R, opts: ReadOptions) -> Result<Self, LogError> {
        let limit = u32::try_from(DECODE_LIMIT_BYTES).unwrap_or(u32::MAX);
        let opts = ReadOptions {
            max_record_bytes: opts.max_record_bytes.min(limit),
            max_header_bytes: opts.max_header_bytes.min(limit),
            salvage: opts.salvage,
        };
        let mut input = Input {
            src,
            buf: Vec::new(),
            pos: 0,
            end: 0,
            base: 0,
            eof: false,
        };
        let (header, header_bytes, version) = read_header(&mut input, &opts)?;
        Ok(Self {
            input,
            opts,
            header,
            header_bytes,
            version,
            expected_seq: 0,
            after_damage: false,
            saw_end: false,
            done: false,
            last_offset: 0,
            damage: Vec::new(),
            stats: SalvageStats::default(),
        })
    }

    /// The header.
    #[must_use]
    pub fn header(&self) -> &LogHeader {
        &self.header
    }

    /// The file's format version.
    #[must_use]
    pub fn version(&self) -> u16 {
        self.version
    }

    /// Size of the file header (prefix and header section), bytes.
    #[must_use]
    pub fn header_bytes(&self) -> u64 {
        self.header_bytes
    }

    /// The options in force (after clamping).
    #[must_use]
    pub fn options(&self) -> ReadOptions {
        self.opts
    }

    /// Byte offset of the next unread byte.
    #[must_use]
    pub fn offset(&self) -> u64 {
        self.input.base + self.input.pos as u64
    }

    /// Byte offset of the frame of the last record returned.
    #[must_use]
    pub fn last_record_offset(&self) -> u64 {
        self.last_offset
    }

    /// Whether an end record has been read.
    #[must_use]
    pub fn saw_end(&self) -> bool {
        self.saw_end
    }

    /// Damage found so far (salvage mode; in strict mode the one damage is
    /// also in the error).
    #[must_use]
    pub fn damage(&self) -> &[Damage] {
        &self.damage
    }

    /// Salvage counters so far.
    #[must_use]
    pub fn stats(&self) -> SalvageStats {
        self.stats
    }

    /// Note a damaged place. Strict: stop and return it. Salvage: skip to
    /// the next good frame (or `skip` bytes, when the frame's extent is
    /// trusted), list it, go on.
    fn damaged(
        &mut self,
        kind: DamageKind,
        skip: Option<usize>,
        at_end: bool,
    ) -> Result<(), LogError> {
        let offset = self.offset();
        let record_index = self.expected_seq;
        if !self.opts.salvage {
            self.done = true;
            return Err(LogError::Damaged(Damage {
                offset,
                record_index,
                kind,
                skipped_bytes: 0,
            }));
        }
        if at_end {
            match kind {
                DamageKind::Truncated { .. } => self.input.pos = self.input.end,
                // Count every byte after the end record, a buffer at a time.
                DamageKind::AfterEnd => loop {
                    self.input.pos = self.input.end;
                    if self.input.fill(1)? == 0 {
                        break;
                    }
                },
                _ => {}
            }
            self.done = true;
        } else {
            match skip {
                Some(n) => self.input.pos += n,
                None => {
                    self.input.pos += 1;
                    self.resync()?;
                }
            }
            self.after_damage = skip.is_none();
        }
        let skipped_bytes = self.offset() - offset;
        self.stats.damaged_places += 1;
        self.stats.bytes_skipped += skipped_bytes;
        if self.damage.len() < Self::MAX_LISTED_DAMAGE {
            self.damage.push(Damage {
                offset,
                record_index,
                kind,
                skipped_bytes,
            });
        } else {
            self.stats.damage_not_listed += 1;
        }
        Ok(())
    }

    /// Scan from `pos` for the next frame marker followed by a valid frame
    /// header with an acceptable length; leave `pos` there, or at the end of
    /// the data if there is none.
    fn resync(&mut self) -> Result<(), LogError> {
        loop {
            let avail = self.input.fill(FRAME_HEADER_BYTES)?;
            if avail < FRAME_HEADER_BYTES {
                self.input.pos = self.input.end;
                return Ok(());
            }
            let window = &self.input.buf[self.input.pos..self.input.end];
            let last = window.len() - FRAME_HEADER_BYTES;
            let mut i = 0;
            while i <= last {
                match window[i..=last].iter().position(|&b| b == format::SYNC[0]) {
                    None => break,
                    Some(j) => i += j,
                }
                if let Ok(h) = format::decode_head(&window[i..])
                    && h.len <= self.opts.max_record_bytes
                {
                    self.input.pos += i;
                    return Ok(());
                }
                i += 1;
            }
            // Keep the last bytes that could start a frame header.
            self.input.pos += last + 1;
        }
    }

    /// The next good record, or `Ok(None)` at the end of the log.
    ///
    /// # Errors
    /// Strict mode: [`LogError::Damaged`] at the first damage (then
    /// `Ok(None)` ever after). Both modes: [`LogError::Io`].
    pub fn next_record(&mut self) -> Result<Option<Record>, LogError> {
        loop {
            if self.done {
                return Ok(None);
            }
            let avail = self.input.fill(FRAME_HEADER_BYTES)?;
            if self.saw_end {
                if avail > 0 {
                    self.damaged(DamageKind::AfterEnd, None, true)?;
                }
                self.done = true;
                return Ok(None);
            }
            if avail < FRAME_HEADER_BYTES {
                if avail == 0 {
                    self.damaged(DamageKind::Truncated { partial_bytes: 0 }, None, true)?;
                    continue;
                }
                let have = &self.input.buf[self.input.pos..self.input.end];
                let n = have.len().min(format::SYNC.len());
                if have[..n] == format::SYNC[..n] {
                    let partial_bytes = avail as u64;
                    self.damaged(DamageKind::Truncated { partial_bytes }, None, true)?;
                } else {
                    self.damaged(DamageKind::LostSync, None, false)?;
                }
                continue;
            }
            let head = match format::decode_head(&self.input.buf[self.input.pos..self.input.end]) {
                Ok(h) => h,
                Err(HeadFault::NoSync) => {
                    self.damaged(DamageKind::LostSync, None, false)?;
                    continue;
                }
                Err(HeadFault::Check) => {
                    self.damaged(DamageKind::BadFrameHeader, None, false)?;
                    continue;
                }
            };
            if head.len > self.opts.max_record_bytes {
                let kind = DamageKind::TooLong {
                    len: head.len,
                    max: self.opts.max_record_bytes,
                };
                self.damaged(kind, None, false)?;
                continue;
            }
            let total = FRAME_HEADER_BYTES + head.len as usize;
            let avail = self.input.fill(total)?;
            if avail < total {
                let partial_bytes = avail as u64;
                self.damaged(DamageKind::Truncated { partial_bytes }, None, true)?;
                continue;
            }
            let payload_range = self.input.pos + FRAME_HEADER_BYTES..self.input.pos + total;
            let computed = crc32fast::hash(&self.input.buf[payload_range.clone()]);
            if computed != head.crc {
                let kind = DamageKind::BadCrc {
                    stored: head.crc,
                    computed,
                };
                self.damaged(kind, None, false)?;
                continue;
            }
            if u64::from(head.seq) < self.expected_seq {
                self.duplicate(&head, total)?;
                continue;
            }
            self.check_sequence(&head)?;
            let payload = &self.input.buf[payload_range];
            let decoded = match head.kind {
                format::KIND_FRAME => {
                    codec::decode_frame_payload_version(payload, self.version).map(Record::Frame)
                }
                format::KIND_EVENT => codec::decode_payload(payload).map(Record::Event),
                format::KIND_END => codec::decode_payload(payload).map(Record::End),
                kind => {
                    self.damaged(DamageKind::UnknownKind { kind }, Some(total), false)?;
                    self.stats.records_lost += 1;
                    self.expected_seq = u64::from(head.seq) + 1;
                    continue;
                }
            };
            match decoded {
                Ok(record) => {
                    self.last_offset = self.offset();
                    self.input.pos += total;
                    self.expected_seq = u64::from(head.seq) + 1;
                    self.after_damage = false;
                    self.stats.records_read += 1;
                    if matches!(record, Record::End(_)) {
                        self.saw_end = true;
                    }
                    return Ok(Some(record));
                }
                Err(e) => {
                    let kind = DamageKind::Undecodable {
                        kind: head.kind,
                        reason: e.message,
                    };
                    self.damaged(kind, Some(total), false)?;
                    self.stats.records_lost += 1;
                    self.expected_seq = u64::from(head.seq) + 1;
                }
            }
        }
    }

    /// An intact record whose sequence number was already read. Strict:
    /// stop with [`DamageKind::Duplicate`]. Salvage: skip it (`total`
    /// bytes), listing a run of them at one place as one damage.
    fn duplicate(&mut self, head: &FrameHead, total: usize) -> Result<(), LogError> {
        let seq = u64::from(head.seq);
        let offset = self.offset();
        if !self.opts.salvage {
            self.done = true;
            return Err(LogError::Damaged(Damage {
                offset,
                record_index: self.expected_seq,
                kind: DamageKind::Duplicate {
                    first_seq: seq,
                    records: 1,
                },
                skipped_bytes: 0,
            }));
        }
        self.input.pos += total;
        let bytes = total as u64;
        self.stats.duplicates_skipped += 1;
        self.stats.bytes_skipped += bytes;
        if let Some(Damage {
            offset: o,
            kind: DamageKind::Duplicate { first_seq, records },
            skipped_bytes,
            ..
        }) = self.damage.last_mut()
            && *o + *skipped_bytes == offset
            && *first_seq + *records == seq
        {
            *records += 1;
            *skipped_bytes += bytes;
            return Ok(());
        }
        self.stats.damaged_places += 1;
        if self.damage.len() < Self::MAX_LISTED_DAMAGE {
            self.damage.push(Damage {
                offset,
                record_index: self.expected_seq,
                kind: DamageKind::Duplicate {
                    first_seq: seq,
                    records: 1,
                },
                skipped_bytes: bytes,
            });
        } else {
            self.stats.damage_not_listed += 1;
        }
        Ok(())
    }

    /// Check an intact frame's sequence number (salvage keeps the frame
    /// either way: it is intact, only out of place).
    fn check_sequence(&mut self, head: &FrameHead) -> Result<(), LogError> {
        let seq = u64::from(head.seq);
        if seq == self.expected_seq {
            return Ok(());
        }
        if self.opts.salvage && self.after_damage && seq > self.expected_seq {
            // The gap is what the damage just skipped.
            self.stats.records_lost += seq - self.expected_seq;
            return Ok(());
        }
        let kind = DamageKind::OutOfSequence {
            expected: self.expected_seq,
            found: seq,
        };
        self.damaged(kind, Some(0), false)?;
        if seq > self.expected_seq {
            self.stats.records_lost += seq - self.expected_seq;
        }
        Ok(())
    }
}

/// The byte source with its look-ahead buffer.
#[derive(Debug)]
struct Input<R: Read> {
    src: R,
    buf: Vec<u8>,
    pos: usize,
    end: usize,
    base: u64,
    eof: bool,
}

impl<R: Read> Input<R> {
    /// Make at least `need` bytes available from `pos`, unless the source
    /// ends first; returns the bytes available.
    fn fill(&mut self, need: usize) -> Result<usize, LogError> {
        while self.end - self.pos < need && !self.eof {
            if self.pos > 0 {
                self.buf.copy_within(self.pos..self.end, 0);
                self.base += self.pos as u64;
                self.end -= self.pos;
                self.pos = 0;
            }
            let target = need.max(CHUNK);
            if self.buf.len() < target {
                self.buf.resize(target, 0);
            }
            match self.src.read(&mut self.buf[self.end..]) {
                Ok(0) => self.eof = true,
                Ok(n) => self.end += n,
                Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
                Err(source) => {
                    return Err(LogError::Io {
                        offset: self.base + self.end as u64,
                        source,
                    });
                }
            }
        }
        Ok(self.end - self.pos)
    }
}

fn header_damage(offset: u64, kind: DamageKind) -> LogError {
    LogError::Damaged(Damage {
        offset,
        record_index: 0,
        kind,
        skipped_bytes: 0,
    })
}

fn read_header<R: Read>(
    inp: &mut Input<R>,
    opts: &ReadOptions,
) -> Result<(LogHeader, u64, u16), LogError> {
    let avail = inp.fill(format::FILE_PREFIX_BYTES)?;
    let have = &inp.buf[inp.pos..inp.pos + avail];
    let magic_part = have.len().min(8);
    if have[..magic_part] != format::MAGIC[..magic_part] {
        let mut found = [0u8; 8];
        found[..magic_part].copy_from_slice(&have[..magic_part]);
        return Err(header_damage(0, DamageKind::BadMagic { found }));
    }
    if avail < format::FILE_PREFIX_BYTES {
        return Err(header_damage(
            0,
            DamageKind::Truncated {
                partial_bytes: avail as u64,
            },
        ));
    }
    let p = &inp.buf[inp.pos..inp.pos + format::FILE_PREFIX_BYTES];
    let version = u16::from_le_bytes([p[8], p[9]]);
    if !(format::OLDEST_READ_VERSION..=format::VERSION).contains(&version) {
        return Err(header_damage(
            format::VERSION_OFFSET,
            DamageKind::UnsupportedVersion {
                found: version,
                supported: format::VERSION,
            },
        ));
    }
    let flags = u16::from_le_bytes([p[10], p[11]]);
    if flags != 0 {
        return Err(header_damage(
            format::FLAGS_OFFSET,
            DamageKind::BadHeader {
                reason: format!("reserved flags {flags:#06x} set"),
            },
        ));
    }
    let len = u32::from_le_bytes([p[12], p[13], p[14], p[15]]);
    let crc = u32::from_le_bytes([p[16], p[17], p[18], p[19]]);
    if len > opts.max_header_bytes {
        return Err(header_damage(
            format::HEADER_LEN_OFFSET,
            DamageKind::BadHeader {
                reason: format!(
                    "header length {len} over the limit of {}",
                    opts.max_header_bytes
                ),
            },
        ));
    }
    let total = format::FILE_PREFIX_BYTES + len as usize;
    let avail = inp.fill(total)?;
    if avail < total {
        return Err(header_damage(
            0,
            DamageKind::Truncated {
                partial_bytes: avail as u64,
            },
        ));
    }
    let text = &inp.buf[inp.pos + format::FILE_PREFIX_BYTES..inp.pos + total];
    let computed = crc32fast::hash(text);
    if computed != crc {
        return Err(header_damage(
            format::HEADER_LEN_OFFSET,
            DamageKind::BadHeader {
                reason: format!("CRC mismatch (stored {crc:08x}, computed {computed:08x})"),
            },
        ));
    }
    let header = codec::decode_header(text).map_err(|e| {
        header_damage(
            format::HEADER_LEN_OFFSET,
            DamageKind::BadHeader { reason: e.message },
        )
    })?;
    inp.pos += total;
    Ok((header, total as u64, version))
}

impl<R: Read> Iterator for LogReader<R> {
    type Item = Result<Record, LogError>;

    fn next(&mut self) -> Option<Self::Item> {
        self.next_record().transpose()
    }
}
