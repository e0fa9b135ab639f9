//! Tests of the log format: round trips, damage at every byte, truncation
//! at every length, salvage, limits, inspect.

use std::io::Read;

use proptest::prelude::*;

use super::format::{self, FRAME_HEADER_BYTES};
use super::synth::{demo_header, synthetic_frame};
use super::*;
use crate::record::{ContactRecord, FrameRecord, JointRecord, PoseRecord};

/// A reader that hands out at most `step` bytes per call, to cross every
/// buffer boundary.
struct Trickle<'a> {
    data: &'a [u8],
    step: usize,
}

impl Read for Trickle<'_> {
    fn read(&mut self, out: &mut [u8]) -> std::io::Result<usize> {
        let n = self.step.min(out.len()).min(self.data.len());
        out[..n].copy_from_slice(&self.data[..n]);
        self.data = &self.data[n..];
        Ok(n)
    }
}

/// A small log and the byte offset of each of its records.
fn small_log() -> (Vec<u8>, Vec<Record>, Vec<u64>, u64) {
    let header = demo_header(3);
    let mut w = LogWriter::new(Vec::new(), &header).unwrap();
    let header_end = w.bytes_written();
    let mut records = Vec::new();
    let mut offsets = Vec::new();
    for i in 0..5 {
        let r = if i == 2 {
            Record::Event(EventRecord {
                time_s: 0.02,
                event: Event::FaultInjected {
                    channel: "port 3".into(),
                    fault: "stuck".into(),
                },
            })
        } else {
            Record::Frame(synthetic_frame(i, 7, 2, usize::try_from(i).unwrap()))
        };
        offsets.push(w.bytes_written());
        w.write(&r).unwrap();
        records.push(r);
    }
    offsets.push(w.bytes_written());
    let bytes = w.finish("done").unwrap();
    offsets.push(bytes.len() as u64);
    let mut r = LogReader::open(bytes.as_slice(), ReadOptions::default()).unwrap();
    let mut all = Vec::new();
    while let Some(x) = r.next_record().unwrap() {
        all.push(x);
    }
    assert_eq!(all.len(), 6);
    assert_eq!(&all[..5], &records[..]);
    records.push(all[5].clone());
    (bytes, records, offsets, header_end)
}

/// Read everything; return the records and the error that stopped it.
fn drain(bytes: &[u8], opts: ReadOptions) -> Result<(Vec<Record>, Option<LogError>), LogError> {
    let mut r = LogReader::open(bytes, opts)?;
    let mut out = Vec::new();
    loop {
        match r.next_record() {
            Ok(Some(x)) => out.push(x),
            Ok(None) => return Ok((out, None)),
            Err(e) => {
                assert!(
                    matches!(r.next_record(), Ok(None)),
                    "reader stops after damage"
                );
                return Ok((out, Some(e)));
            }
        }
    }
}

fn salvage_all(bytes: &[u8]) -> (Vec<Record>, Vec<Damage>, SalvageStats) {
    let mut r = LogReader::open(bytes, ReadOptions::salvage()).unwrap();
    let mut out = Vec::new();
    while let Some(x) = r.next_record().unwrap() {
        out.push(x);
    }
    (out, r.damage().to_vec(), r.stats())
}

#[test]
fn clean_log_reads_back_in_both_modes_and_any_chunking() {
    let (bytes, records, _, _) = small_log();
    let (got, err) = drain(&bytes, ReadOptions::default()).unwrap();
    assert!(err.is_none());
    assert_eq!(got, records);
    let (got, damage, stats) = salvage_all(&bytes);
    assert_eq!(got, records);
    assert!(damage.is_empty());
    assert_eq!(stats.records_read, 6);
    for step in [1, 3, 7, 19, 20, 21] {
        let r = LogReader::open(Trickle { data: &bytes, step }, ReadOptions::default()).unwrap();
        let got: Vec<Record> = r.map(Result::unwrap).collect();
        assert_eq!(got, records, "step {step}");
    }
    match &records[5] {
        Record::End(e) => {
            assert_eq!((e.frames, e.events), (4, 1));
            assert_eq!(e.first_time_s, Some(0.0));
            assert_eq!(e.last_time_s, Some(0.04));
            assert_eq!(e.note, "done");
        }
        other => panic!("last record is {other:?}"),
    }
}

/// Where damage to file byte `i` must be reported, for header bytes.
fn header_fault_offset(i: usize) -> u64 {
    match i {
        0..8 => 0,
        8..10 => format::VERSION_OFFSET,
        10..12 => format::FLAGS_OFFSET,
        _ => format::HEADER_LEN_OFFSET,
    }
}

#[test]
fn damage_at_every_byte_is_reported_at_its_record_and_salvaged() {
    let (bytes, records, offsets, header_end) = small_log();
    let header_end = usize::try_from(header_end).unwrap();
    for flip in [0xFFu8, 0x01, 0x80] {
        for i in 0..bytes.len() {
            let mut bad = bytes.clone();
            bad[i] ^= flip;
            if i < header_end {
                let d = match LogReader::open(bad.as_slice(), ReadOptions::salvage()) {
                    Ok(_) => panic!("header byte {i} ^ {flip:#x} not detected"),
                    Err(e) => e.damage().unwrap().clone(),
                };
                let want = header_fault_offset(i);
                let ok_kind = match i {
                    0..8 => matches!(d.kind, DamageKind::BadMagic { .. }),
                    8..10 => matches!(d.kind, DamageKind::UnsupportedVersion { .. }),
                    12..16 => {
                        matches!(d.kind, DamageKind::BadHeader { .. })
                            || (matches!(d.kind, DamageKind::Truncated { .. }) && d.offset == 0)
                    }
                    _ => matches!(d.kind, DamageKind::BadHeader { .. }),
                };
                assert!(ok_kind, "byte {i}: {d}");
                if !matches!(d.kind, DamageKind::Truncated { .. }) {
                    assert_eq!(d.offset, want, "byte {i}: {d}");
                }
                continue;
            }
            let k = offsets.iter().rposition(|&o| o <= i as u64).unwrap();
            // Strict: records before k intact, then damage at record k.
            let (got, err) = drain(&bad, ReadOptions::default()).unwrap();
            assert_eq!(&got[..], &records[..k], "byte {i}");
            let d = err.unwrap().damage().unwrap().clone();
            assert_eq!(d.offset, offsets[k], "byte {i}: {d}");
            assert_eq!(d.record_index, k as u64, "byte {i}: {d}");
            // Salvage: every other record.
            let (got, damage, stats) = salvage_all(&bad);
            let mut want: Vec<Record> = records.clone();
            want.remove(k);
            assert_eq!(got, want, "byte {i}");
            assert_eq!(damage[0].offset, offsets[k], "byte {i}");
            assert_eq!(
                damage[0].skipped_bytes,
                offsets[k + 1] - offsets[k],
                "byte {i}"
            );
            if k + 1 < records.len() {
                assert_eq!(damage.len(), 1, "byte {i}: {damage:?}");
                assert_eq!(stats.records_lost, 1, "byte {i}");
            } else {
                // The end record itself: the tail is then missing its end.
                assert!(matches!(
                    damage.last().unwrap().kind,
                    DamageKind::Truncated { partial_bytes: 0 }
                ));
            }
        }
    }
}

#[test]
fn truncation_at_every_length_reports_the_cut_record() {
    let (bytes, records, offsets, header_end) = small_log();
    for len in 0..bytes.len() {
        let cut = &bytes[..len];
        if (len as u64) < header_end {
            let e = LogReader::open(cut, ReadOptions::salvage()).unwrap_err();
            let d = e.damage().unwrap();
            assert_eq!(
                d.kind,
                DamageKind::Truncated {
                    partial_bytes: len as u64
                },
                "len {len}"
            );
            assert_eq!((d.offset, d.record_index), (0, 0));
            continue;
        }
        // First record not wholly inside the cut.
        let k = offsets.iter().position(|&o| o > len as u64).unwrap() - 1;
        let (got, err) = drain(cut, ReadOptions::default()).unwrap();
        assert_eq!(&got[..], &records[..k], "len {len}");
        let d = err.unwrap().damage().unwrap().clone();
        assert_eq!(
            d.kind,
            DamageKind::Truncated {
                partial_bytes: len as u64 - offsets[k]
            },
            "len {len}"
        );
        assert_eq!(d.offset, offsets[k]);
        assert_eq!(d.record_index, k as u64);
        let (got, damage, _) = salvage_all(cut);
        assert_eq!(&got[..], &records[..k], "len {len}");
        assert_eq!(damage.len(), 1);
        assert_eq!(damage[0].offset, offsets[k]);
    }
}

#[test]
fn every_single_byte_error_in_a_frame_header_is_caught_by_its_check() {
    let head = format::encode_head(&format::FrameHead {
        len: 1234,
        seq: 77,
        kind: 1,
        crc: 0xDEAD_BEEF,
    });
    assert!(format::decode_head(&head).is_ok());
    for i in 0..16 {
        for e in 1..=255u8 {
            let mut h = head;
            h[i] ^= e;
            assert!(format::decode_head(&h).is_err(), "byte {i} ^ {e:#x}");
        }
    }
}

#[test]
fn unknown_kind_is_reported_in_strict_mode_and_skipped_by_salvage() {
    let header = demo_header(2);
    let mut w = LogWriter::new(Vec::new(), &header).unwrap();
    w.write_frame(&synthetic_frame(0, 7, 1, 0)).unwrap();
    let at = w.bytes_written();
    w.write_raw(200, b"from a later version").unwrap();
    w.write_frame(&synthetic_frame(1, 7, 1, 0)).unwrap();
    let bytes = w.finish("").unwrap();
    let (got, err) = drain(&bytes, ReadOptions::default()).unwrap();
    assert_eq!(got.len(), 1);
    let d = err.unwrap().damage().unwrap().clone();
    assert_eq!(d.kind, DamageKind::UnknownKind { kind: 200 });
    assert_eq!((d.offset, d.record_index), (at, 1));
    let (got, damage, stats) = salvage_all(&bytes);
    assert_eq!(got.len(), 3);
    assert_eq!(damage.len(), 1);
    assert_eq!(damage[0].skipped_bytes, 20 + 20);
    assert_eq!(stats.records_lost, 1);
    let report = inspect(bytes.as_slice(), ReadOptions::default()).unwrap();
    assert_eq!(report.counts.unknown, 1);
    assert_eq!(report.counts.frames, 2);
}

#[test]
fn payload_that_does_not_decode_is_reported() {
    let header = demo_header(2);
    let mut w = LogWriter::new(Vec::new(), &header).unwrap();
    w.write_raw(format::KIND_FRAME, &[0xFF; 3]).unwrap();
    let bytes = w.finish("").unwrap();
    let (_, err) = drain(&bytes, ReadOptions::default()).unwrap();
    let d = err.unwrap().damage().unwrap().clone();
    assert!(
        matches!(d.kind, DamageKind::Undecodable { kind: 1, .. }),
        "{d}"
    );
    let (got, damage, _) = salvage_all(&bytes);
    assert_eq!(got.len(), 1, "the end record survives");
    assert_eq!(damage.len(), 1);
}

#[test]
fn records_over_the_limit_are_refused_before_reading_them() {
    let header = demo_header(2);
    let mut w = LogWriter::new(Vec::new(), &header).unwrap();
    w.write_raw(format::KIND_EVENT, &vec![7u8; 5000]).unwrap();
    w.write_frame(&synthetic_frame(0, 7, 1, 0)).unwrap();
    let bytes = w.finish("").unwrap();
    let opts = ReadOptions {
        max_record_bytes: 4096,
        ..ReadOptions::default()
    };
    let (_, err) = drain(&bytes, opts).unwrap();
    let d = err.unwrap().damage().unwrap().clone();
    assert_eq!(
        d.kind,
        DamageKind::TooLong {
            len: 5000,
            max: 4096
        }
    );
    let (got, _, _) = {
        let mut r = LogReader::open(
            bytes.as_slice(),
            ReadOptions {
                salvage: true,
                ..opts
            },
        )
        .unwrap();
        let got: Vec<Record> = r.by_ref().map(Result::unwrap).collect();
        (got, r.damage().to_vec(), r.stats())
    };
    assert_eq!(got.len(), 2);
}

#[test]
fn missing_record_is_out_of_sequence() {
    let (bytes, records, offsets, _) = small_log();
    // Cut record 1 out whole: every frame still intact.
    let (a, b) = (
        usize::try_from(offsets[1]).unwrap(),
        usize::try_from(offsets[2]).unwrap(),
    );
    let spliced = [&bytes[..a], &bytes[b..]].concat();
    let (got, err) = drain(&spliced, ReadOptions::default()).unwrap();
    assert_eq!(&got[..], &records[..1]);
    let d = err.unwrap().damage().unwrap().clone();
    assert_eq!(
        d.kind,
        DamageKind::OutOfSequence {
            expected: 1,
            found: 2
        }
    );
    assert_eq!(d.offset, offsets[1]);
    let (got, damage, stats) = salvage_all(&spliced);
    assert_eq!(got.len(), 5);
    assert_eq!(damage.len(), 1);
    assert_eq!(stats.records_lost, 1);
}

#[test]
fn bytes_after_the_end_record_are_reported() {
    let (mut bytes, records, _, _) = small_log();
    let end_at = bytes.len() as u64;
    bytes.extend_from_slice(b"junk");
    let (got, err) = drain(&bytes, ReadOptions::default()).unwrap();
    assert_eq!(got, records, "the end record is returned first");
    let d = err.unwrap().damage().unwrap().clone();
    assert_eq!((d.kind, d.offset), (DamageKind::AfterEnd, end_at));
    // Salvage counts every byte after the end, across buffer refills.
    let mut long = bytes.clone();
    long.extend(std::iter::repeat_n(0xa5u8, 200_000));
    let (_, damage, stats) = salvage_all(&long);
    assert_eq!(damage.len(), 1);
    assert_eq!(damage[0].kind, DamageKind::AfterEnd);
    assert_eq!(damage[0].skipped_bytes, 4 + 200_000);
    assert_eq!(stats.bytes_skipped, 4 + 200_000);
}

#[test]
fn file_header_damage_is_named_as_such() {
    let (mut bytes, _, _, _) = small_log();
    bytes[12] ^= 1;
    let e = drain(&bytes, ReadOptions::salvage()).unwrap_err();
    let text = e.to_string();
    assert!(
        text.starts_with("file header damaged at byte 12: bad header"),
        "{text}"
    );
}

#[test]
fn salvage_resyncs_across_buffer_boundaries_in_a_long_log() {
    let header = demo_header(9);
    let mut w = LogWriter::new(Vec::new(), &header).unwrap();
    let mut offsets = Vec::new();
    for i in 0..600 {
        offsets.push(w.bytes_written());
        w.write_frame(&synthetic_frame(i, 7, 8, 8)).unwrap();
    }
    let mut bytes = w.finish("").unwrap();
    assert!(bytes.len() > 3 * 64 * 1024, "log spans several read chunks");
    // Wipe a stretch covering frames 100..=250 (crosses a 64 KiB boundary).
    let from = usize::try_from(offsets[100]).unwrap() + 5;
    let to = usize::try_from(offsets[250]).unwrap() + 7;
    for b in &mut bytes[from..to] {
        *b = 0xE7; // the first sync byte, to make the scan work hard
    }
    for step in [usize::MAX, 1000] {
        let r = LogReader::open(Trickle { data: &bytes, step }, ReadOptions::salvage()).unwrap();
        let mut r = r;
        let mut times = Vec::new();
        while let Some(rec) = r.next_record().unwrap() {
            if let Record::Frame(f) = rec {
                times.push(f.time_s);
            }
        }
        let want: Vec<f64> = (0..600)
            .filter(|i| !(100..=250).contains(i))
            .map(|i| synthetic_frame(i, 7, 8, 8).time_s)
            .collect();
        assert_eq!(times, want);
        assert_eq!(r.damage().len(), 1);
        assert_eq!(r.damage()[0].offset, offsets[100]);
        assert_eq!(r.damage()[0].skipped_bytes, offsets[251] - offsets[100]);
        assert_eq!(r.stats().records_lost, 151);
    }
}

#[test]
fn inspect_counts_gaps_health_and_damage() {
    let header = demo_header(3);
    let mut w = LogWriter::new(Vec::new(), &header).unwrap();
    // Frames at 100 Hz with a 50 ms hole after t = 0.04 and one of 25 ms
    // after t = 0.10; the nominal step (10 ms) comes from the header.
    let times = [0.0, 0.01, 0.02, 0.03, 0.04, 0.09, 0.10, 0.125, 0.135];
    let mut offsets = Vec::new();
    for (i, &t) in times.iter().enumerate() {
        let mut f = synthetic_frame(0, 7, 2, 2);
        f.time_s = t;
        if i == 3 {
            f.pose = None;
            f.port_pressures_pa.as_mut().unwrap()[4] = f64::NAN;
        }
        if i == 5 {
            f.contacts.clear();
            f.joints = None;
        }
        offsets.push(w.bytes_written());
        w.write_frame(&f).unwrap();
    }
    w.write_event(&EventRecord {
        time_s: 0.05,
        event: Event::Truth {
            label: "junction 1".into(),
            position_m: None,
            value: Some(0.2),
        },
    })
    .unwrap();
    let mut bytes = w.finish("").unwrap();
    let clean = inspect(bytes.as_slice(), ReadOptions::default()).unwrap();
    assert!(clean.is_clean());
    assert_eq!(clean.counts.frames, 9);
    assert_eq!(clean.counts.truth_markers, 1);
    assert_eq!(clean.counts.ends, 1);
    assert_eq!(clean.time.first_s, Some(0.0));
    assert_eq!(clean.time.last_s, Some(0.135));
    assert!((clean.time.largest_gap_s.unwrap() - 0.05).abs() < 1e-12);
    assert_eq!(clean.time.largest_gap_after_s, Some(0.04));
    assert_eq!(clean.time.gaps_over_two_steps, 2);
    assert!(clean.time.step_from_header);
    assert_eq!(clean.health.with_pose, 8);
    assert_eq!(clean.health.nan_port_values, 1);
    assert!((clean.health.pose_fraction - 8.0 / 9.0).abs() < 1e-15);
    assert_eq!(clean.health.with_contacts, 8);
    assert_eq!(clean.health.with_joints, 8);
    assert_eq!(clean.health.joint_count_mismatch, 0);
    // Damage frame 6's payload: the report lists it, the counts lose it.
    bytes[usize::try_from(offsets[6]).unwrap() + FRAME_HEADER_BYTES + 3] ^= 0x10;
    let damaged = inspect(bytes.as_slice(), ReadOptions::default()).unwrap();
    assert!(!damaged.is_clean());
    assert_eq!(damaged.counts.frames, 8);
    assert_eq!(damaged.damage.len(), 1);
    assert_eq!(damaged.damage[0].offset, offsets[6]);
    assert!(matches!(damaged.damage[0].kind, DamageKind::BadCrc { .. }));
    let text = damaged.to_string();
    assert!(text.contains("bad CRC"), "{text}");
}

#[test]
fn header_without_period_estimates_the_step() {
    let mut header = demo_header(2);
    header.frame_period_s = None;
    let mut w = LogWriter::new(Vec::new(), &header).unwrap();
    for i in 0..50u32 {
        let mut f = synthetic_frame(0, 7, 1, 0);
        // 20 ms steps with a single 100 ms hole.
        f.time_s = 0.02 * f64::from(i) + if i >= 30 { 0.08 } else { 0.0 };
        w.write_frame(&f).unwrap();
    }
    let bytes = w.finish("").unwrap();
    let rep = inspect(bytes.as_slice(), ReadOptions::default()).unwrap();
    assert!(!rep.time.step_from_header);
    assert!((rep.time.nominal_step_s.unwrap() - 0.02).abs() < 1e-12);
    assert_eq!(rep.time.gaps_over_two_steps, 1);
}

#[test]
fn header_round_trips_exactly() {
    let mut h = demo_header(4);
    h.navigator_config = serde_json::json!({"follow": {"gain": 0.1 + 0.2}, "hold_s": 3});
    h.provenance.insert("seed".into(), "42".into());
    let bytes = LogWriter::new(Vec::new(), &h).unwrap().finish("").unwrap();
    let r = LogReader::open(bytes.as_slice(), ReadOptions::default()).unwrap();
    assert_eq!(r.header(), &h);
}

#[test]
fn nan_in_the_header_is_refused_by_the_writer() {
    let mut h = demo_header(1);
    h.gas.gamma = f64::NAN;
    assert!(matches!(
        LogWriter::new(Vec::new(), &h),
        Err(LogError::Encode { what: "header", .. })
    ));
}

fn finite() -> impl Strategy<Value = f64> {
    prop_oneof![
        -1e6..1e6f64,
        Just(0.0),
        Just(-0.0),
        proptest::num::f64::NORMAL | proptest::num::f64::SUBNORMAL
    ]
}

fn any_f64() -> impl Strategy<Value = f64> {
    prop_oneof![4 => finite(), 1 => proptest::num::f64::ANY]
}

prop_compose! {
    fn arb_frame()(
        time_s in any_f64(),
        pose in proptest::option::of((
            proptest::array::uniform3(any_f64()),
            proptest::array::uniform4(any_f64()),
            any_f64(),
            any_f64(),
        )),
        joints in proptest::option::of(proptest::collection::vec((any_f64(), any_f64()), 0..12)),
        ports in proptest::option::of(proptest::collection::vec(any_f64(), 0..9)),
        temp in proptest::option::of(any_f64()),
        contacts in proptest::collection::vec(
            (any::<u16>(), any::<u16>(), any_f64(), proptest::option::of(proptest::array::uniform3(any_f64()))),
            0..10,
        ),
        contacts_reported in any::<bool>(),
    ) -> FrameRecord {
        FrameRecord {
            time_s,
            pose: pose.map(|(p, q, s, a)| PoseRecord {
                position_m: p,
                orientation_wxyz: q,
                position_sigma_m: s,
                attitude_sigma_rad: a,
            }),
            joints: joints.map(|js| {
                js.into_iter()
                    .map(|(pitch_rad, yaw_rad)| JointRecord { pitch_rad, yaw_rad })
                    .collect()
            }),
            port_pressures_pa: ports,
            total_temperature_k: temp,
            contacts: contacts
                .into_iter()
                .map(|(module, sensor, force_n, normal_module)| ContactRecord {
                    module,
                    sensor,
                    force_n,
                    normal_module,
                })
                .collect(),
            contacts_reported,
        }
    }
}

fn arb_event() -> impl Strategy<Value = EventRecord> {
    let ev = prop_oneof![
        (".{0,12}", ".{0,12}").prop_map(|(channel, fault)| Event::FaultInjected { channel, fault }),
        ".{0,12}".prop_map(|channel| Event::FaultCleared { channel }),
        (
            ".{0,12}",
            proptest::option::of(proptest::array::uniform3(any_f64())),
            proptest::option::of(any_f64())
        )
            .prop_map(|(label, position_m, value)| Event::Truth {
                label,
                position_m,
                value
            }),
        ".{0,40}".prop_map(|text| Event::Note { text }),
    ];
    (any_f64(), ev).prop_map(|(time_s, event)| EventRecord { time_s, event })
}

fn arb_record() -> impl Strategy<Value = Record> {
    prop_oneof![
        4 => arb_frame().prop_map(Record::Frame),
        1 => arb_event().prop_map(Record::Event),
    ]
}

/// Payload bytes of a record: equality of these is bit-exact equality of
/// the floats, NaN payloads included.
fn payload_bytes(r: &Record) -> Vec<u8> {
    let mut out = Vec::new();
    match r {
        Record::Frame(f) => codec::encode_payload(f, &mut out),
        Record::Event(e) => codec::encode_payload(e, &mut out),
        Record::End(e) => codec::encode_payload(e, &mut out),
    }
    .unwrap();
    out
}

/// A log of `records` (and its end record), with the byte span of each
/// record, the end record's last, and where the header ends.
fn write_log_with_spans(records: &[Record]) -> (Vec<u8>, Vec<(u64, u64)>, u64) {
    let mut w = LogWriter::new(Vec::new(), &demo_header(2)).unwrap();
    let header_end = w.bytes_written();
    let mut spans = Vec::new();
    for r in records {
        let s = w.bytes_written();
        w.write(r).unwrap();
        spans.push((s, w.bytes_written()));
    }
    let s = w.bytes_written();
    let bytes = w.finish("proptest").unwrap();
    spans.push((s, bytes.len() as u64));
    (bytes, spans, header_end)
}

fn write_log(records: &[Record]) -> Vec<u8> {
    let mut w = LogWriter::new(Vec::new(), &demo_header(2)).unwrap();
    for r in records {
        w.write(r).unwrap();
    }
    w.finish("proptest").unwrap()
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(200))]

    #[test]
    fn random_records_round_trip_bit_for_bit(records in proptest::collection::vec(arb_record(), 0..20)) {
        let bytes = write_log(&records);
        let (got, err) = drain(&bytes, ReadOptions::default()).unwrap();
        prop_assert!(err.is_none());
        prop_assert_eq!(got.len(), records.len() + 1);
        for (a, b) in records.iter().zip(&got) {
            prop_assert_eq!(payload_bytes(a), payload_bytes(b));
        }
        let frames = records.iter().filter(|r| matches!(r, Record::Frame(_))).count() as u64;
        match got.last() {
            Some(Record::End(e)) => prop_assert_eq!(e.frames, frames),
            other => prop_assert!(false, "last record {:?}", other),
        }
    }

    #[test]
    fn random_bytes_never_panic(bytes in proptest::collection::vec(any::<u8>(), 0..2000)) {
        let _ = read_any(&bytes, 4096);
        // With a valid prefix, the record scanner sees the bytes too.
        let mut log = write_log(&[]);
        let header_bytes = LogReader::open(log.as_slice(), ReadOptions::default()).unwrap().header_bytes();
        log.truncate(usize::try_from(header_bytes).unwrap());
        log.extend_from_slice(&bytes);
        let _ = read_any(&log, 4096);
    }

    #[test]
    fn mutated_logs_never_panic_and_salvage_keeps_the_untouched_records(
        records in proptest::collection::vec(arb_record(), 1..12),
        edits in proptest::collection::vec((any::<usize>(), any::<u8>(), 0..3u8), 1..6),
    ) {
        let (mut bytes, spans, header_end) = write_log_with_spans(&records);
        let original: Vec<Record> = {
            let (all, err) = drain(&bytes, ReadOptions::default()).unwrap();
            prop_assert!(err.is_none());
            all
        };
        // Edits at positions of the original file, applied from the last
        // so that each lands where it was drawn.
        let len = bytes.len();
        let mut edits: Vec<(usize, u8, u8)> =
            edits.into_iter().map(|(at, v, op)| (at % len, v, op)).collect();
        edits.sort_by_key(|e| std::cmp::Reverse(e.0));
        for &(at, v, op) in &edits {
            match op {
                0 => bytes[at] ^= v.max(1),
                1 => bytes.insert(at, v),
                _ => { bytes.remove(at); }
            }
        }
        let (strict, salvaged) = read_any(&bytes, 1 << 16);
        prop_assert!(strict <= salvaged);
        prop_assert!(salvaged <= records.len() as u64 + 1);
        // Every record no edit touched comes back from salvage, in order
        // (an insertion just before a record's first byte leaves it whole).
        let touched = |s: u64, e: u64| {
            edits.iter().any(|&(at, _, op)| {
                let at = at as u64;
                if op == 1 { s < at && at < e } else { s <= at && at < e }
            })
        };
        if edits.iter().any(|&(at, _, _)| (at as u64) < header_end) {
            return Ok(()); // the header is gone: nothing can be read
        }
        let untouched: Vec<&Record> = original
            .iter()
            .zip(&spans)
            .filter(|(_, (s, e))| !touched(*s, *e))
            .map(|(r, _)| r)
            .collect();
        let (got, _, _) = salvage_all(&bytes);
        // Compared by payload bytes: NaN fields are not equal to themselves.
        let mut it = got.iter().map(payload_bytes);
        for want in untouched {
            let w = payload_bytes(want);
            prop_assert!(it.any(|g| g == w), "untouched record lost: {:?}", want);
        }
    }
}

/// The direct frame decoder against the codec: whatever it takes, the
/// codec decodes to the same bits; what the encoder writes, it takes.
fn direct_agrees(payload: &[u8]) -> Result<(), TestCaseError> {
    let generic = codec::decode_payload::<FrameRecord>(payload);
    if let Some(direct) = codec::direct_frame(payload) {
        let Ok(g) = &generic else {
            return Err(TestCaseError::fail(format!(
                "direct took what the codec refuses: {generic:?}"
            )));
        };
        let a = payload_bytes(&Record::Frame(direct));
        let b = payload_bytes(&Record::Frame(g.clone()));
        prop_assert_eq!(a, b);
    }
    let fast = codec::decode_frame_payload(payload);
    match (&fast, &generic) {
        (Ok(a), Ok(b)) => prop_assert_eq!(
            payload_bytes(&Record::Frame(a.clone())),
            payload_bytes(&Record::Frame(b.clone()))
        ),
        (Err(a), Err(b)) => prop_assert_eq!(a, b),
        _ => prop_assert!(false, "{fast:?} vs {generic:?}"),
    }
    Ok(())
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(300))]

    #[test]
    fn direct_frame_decoder_takes_every_encoded_frame(frame in arb_frame()) {
        let payload = payload_bytes(&Record::Frame(frame.clone()));
        let direct = codec::direct_frame(&payload);
        prop_assert!(direct.is_some());
        prop_assert_eq!(payload_bytes(&Record::Frame(direct.unwrap())), payload.clone());
        direct_agrees(&payload)?;
    }

    #[test]
    fn direct_frame_decoder_agrees_on_damaged_payloads(
        frame in arb_frame(),
        edits in proptest::collection::vec((any::<usize>(), any::<u8>(), 0..4u8), 1..4),
    ) {
        let mut payload = payload_bytes(&Record::Frame(frame));
        for (at, v, op) in edits {
            let at = at % payload.len().max(1);
            match op {
                0 if !payload.is_empty() => payload[at] ^= v.max(1),
                1 => payload.insert(at.min(payload.len()), v),
                2 if !payload.is_empty() => { payload.remove(at); }
                _ => payload.truncate(at),
            }
        }
        direct_agrees(&payload)?;
    }
}

/// Long sequences (251 or more contacts: three-byte lengths) and module
/// indices that need the two-byte form go the direct way; a length in a
/// longer form than needed is left to the codec, which still reads it.
#[test]
fn direct_frame_decoder_handles_long_forms() {
    let mut f = synthetic_frame(3, 7, 2, 300);
    f.contacts[7].module = 40_000;
    f.contacts[8].sensor = 251;
    let payload = payload_bytes(&Record::Frame(f.clone()));
    let direct = codec::direct_frame(&payload).expect("canonical payload");
    assert_eq!(direct.contacts.len(), 300);
    assert_eq!(direct.contacts[7].module, 40_000);
    assert_eq!(direct.contacts[8].sensor, 251);
    direct_agrees(&payload).unwrap();
    // A frame without pose, joints or ports: the temperature flag is the
    // 4th byte after the time; contacts count 0 follows it, then the
    // contact heartbeat flag (format version 2).
    let bare = FrameRecord {
        time_s: 1.0,
        pose: None,
        joints: None,
        port_pressures_pa: None,
        total_temperature_k: None,
        contacts: Vec::new(),
        contacts_reported: false,
    };
    let mut payload = payload_bytes(&Record::Frame(bare.clone()));
    assert_eq!(payload.len(), 14);
    assert_eq!(payload[12], 0);
    assert_eq!(payload[13], 0);
    // Contact count 0 written in the two-byte form: not canonical.
    payload.truncate(12);
    payload.extend_from_slice(&[251, 0, 0, 0]);
    assert!(codec::direct_frame(&payload).is_none());
    let via_codec = codec::decode_frame_payload(&payload);
    assert_eq!(via_codec, codec::decode_payload::<FrameRecord>(&payload));
}

/// A log of 600 frames with a copy of frames 100..200 spliced in after
/// frame 400, and the offsets of the original frames.
fn log_with_repeated_block() -> (Vec<u8>, Vec<u64>, u64) {
    let header = demo_header(9);
    let mut w = LogWriter::new(Vec::new(), &header).unwrap();
    let mut offsets = Vec::new();
    for i in 0..600 {
        offsets.push(w.bytes_written());
        w.write_frame(&synthetic_frame(i, 7, 8, 3)).unwrap();
    }
    offsets.push(w.bytes_written());
    let bytes = w.finish("").unwrap();
    let at = |i: usize| usize::try_from(offsets[i]).unwrap();
    let block = bytes[at(100)..at(200)].to_vec();
    let spliced = [&bytes[..at(401)], &block[..], &bytes[at(401)..]].concat();
    let dup_at = offsets[401];
    (spliced, offsets, dup_at)
}

#[test]
fn a_repeated_block_is_reported_as_duplicates_and_skipped_not_lost() {
    let (bytes, _, dup_at) = log_with_repeated_block();
    // Strict: stops at the first repeated record, naming it.
    let (got, err) = drain(&bytes, ReadOptions::default()).unwrap();
    assert_eq!(got.len(), 401);
    let d = err.unwrap().damage().unwrap().clone();
    assert_eq!(
        d.kind,
        DamageKind::Duplicate {
            first_seq: 100,
            records: 1
        }
    );
    assert_eq!(d.offset, dup_at);
    // Salvage: every frame once, in order; nothing lost; one place listed.
    for step in [usize::MAX, 777] {
        let mut r =
            LogReader::open(Trickle { data: &bytes, step }, ReadOptions::salvage()).unwrap();
        let mut times = Vec::new();
        let mut end = None;
        while let Some(rec) = r.next_record().unwrap() {
            match rec {
                Record::Frame(f) => times.push(f.time_s),
                Record::End(e) => end = Some(e),
                Record::Event(_) => {}
            }
        }
        let want: Vec<f64> = (0..600)
            .map(|i| synthetic_frame(i, 7, 8, 3).time_s)
            .collect();
        assert_eq!(times, want);
        assert!(end.is_some(), "the end record is read");
        let s = r.stats();
        assert_eq!(s.records_lost, 0);
        assert_eq!(s.duplicates_skipped, 100);
        assert_eq!(s.damaged_places, 1);
        assert_eq!(
            r.damage(),
            &[Damage {
                offset: dup_at,
                record_index: 401,
                kind: DamageKind::Duplicate {
                    first_seq: 100,
                    records: 100
                },
                skipped_bytes: s.bytes_skipped,
            }]
        );
    }
    // inspect says the same.
    let rep = inspect(bytes.as_slice(), ReadOptions::salvage()).unwrap();
    assert_eq!(rep.salvage.records_lost, 0);
    assert_eq!(rep.salvage.duplicates_skipped, 100);
    assert!(
        rep.to_string()
            .contains("0 records lost, 100 repeated records skipped"),
        "{rep}"
    );
}

#[test]
fn version_1_logs_still_read_with_a_reporting_skin() {
    let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("../fixtures/logs");
    let mut seen = 0;
    for name in ["kettle-7-12s.upl", "wrens-3-10s.upl", "drift-5-10s.upl"] {
        let bytes = std::fs::read(dir.join(name)).unwrap();
        assert_eq!(
            u16::from_le_bytes([bytes[8], bytes[9]]),
            1,
            "{name} is a version 1 log"
        );
        let mut r = LogReader::open(bytes.as_slice(), ReadOptions::default()).unwrap();
        assert_eq!(r.version(), 1);
        while let Some(rec) = r.next_record().unwrap() {
            if let Record::Frame(f) = rec {
                assert!(f.contacts_reported);
                seen += 1;
            }
        }
    }
    assert!(seen > 1000, "{seen} frames");
}

#[test]
fn a_silent_skin_round_trips_in_version_2() {
    let mut f = synthetic_frame(3, 7, 2, 0);
    f.contacts_reported = false;
    let mut w = LogWriter::new(Vec::new(), &demo_header(3)).unwrap();
    w.write_frame(&f).unwrap();
    let bytes = w.finish("").unwrap();
    assert_eq!(u16::from_le_bytes([bytes[8], bytes[9]]), format::VERSION);
    let (got, err) = drain(&bytes, ReadOptions::default()).unwrap();
    assert!(err.is_none());
    assert_eq!(got[0], Record::Frame(f));
}

#[test]
fn versions_outside_the_read_range_are_refused() {
    let (mut bytes, ..) = small_log();
    for v in [0u16, format::VERSION + 1] {
        bytes[8..10].copy_from_slice(&v.to_le_bytes());
        let e = LogReader::open(bytes.as_slice(), ReadOptions::default()).unwrap_err();
        assert!(matches!(
            e.damage().map(|d| &d.kind),
            Some(DamageKind::UnsupportedVersion { found, .. }) if *found == v
        ));
    }
}
