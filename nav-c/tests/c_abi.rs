//! The C interface, called through its `extern "C"` functions as a C
//! program would: the same trace digest as `replay run` on every fixture
//! log, caller-provided storage checks, several instances, and errors that
//! name the field at fault.
#![cfg(feature = "host")]
#![allow(unsafe_code)]

use nav_c::*;
use std::ffi::CStr;
use std::mem::MaybeUninit;

/// Storage for one navigator, aligned for any of its fields.
#[repr(C, align(16))]
struct Storage([u8; 96 * 1024]);

fn storage() -> Box<Storage> {
    Box::new(Storage([0; 96 * 1024]))
}

fn text(b: &[std::ffi::c_char]) -> String {
    // SAFETY: the library always NUL-terminates these buffers.
    unsafe { CStr::from_ptr(b.as_ptr()) }
        .to_string_lossy()
        .into_owned()
}

fn no_error() -> UpcError {
    // SAFETY: UpcError is plain data; all-zero is a valid value.
    unsafe { MaybeUninit::<UpcError>::zeroed().assume_init() }
}

fn fixture(name: &str) -> String {
    format!("{}/../fixtures/logs/{name}", env!("CARGO_MANIFEST_DIR"))
}

/// The digest of a log replayed through the C functions.
fn c_digest(path: &str) -> (String, u64) {
    let mut err = no_error();
    let p = std::ffi::CString::new(path).unwrap();
    // SAFETY: valid pointers throughout; the storage outlives the calls.
    unsafe {
        let log = upc_log_open(p.as_ptr(), &mut err);
        assert!(!log.is_null(), "{}", text(&err.message));
        let mut cfg = upc_config_default();
        assert_eq!(upc_log_config(log, &mut cfg, &mut err), UPC_OK);
        let mut mem = storage();
        let raw = std::ptr::addr_of_mut!(mem.0).cast::<core::ffi::c_void>();
        assert_eq!(
            upc_navigator_init(raw, 96 * 1024, &cfg, &mut err),
            UPC_OK,
            "{}",
            text(&err.message)
        );
        let nav = raw.cast::<UpcNavigator>();
        let mut frame = Box::new(MaybeUninit::<UpcFrame>::zeroed().assume_init());
        let mut cmd = UpcCommand::default();
        let mut d = nav_core::digest::Fnv64::new();
        let mut line = vec![0 as std::ffi::c_char; 64 * 1024];
        let mut steps = 0u64;
        loop {
            let r = upc_log_next_frame(log, &mut *frame, &mut err);
            if r == UPC_END {
                break;
            }
            assert_eq!(r, UPC_FRAME, "{}", text(&err.message));
            assert_eq!(upc_navigator_step(nav, &*frame, &mut cmd, &mut err), UPC_OK);
            let mut len = 0usize;
            assert_eq!(
                upc_trace_line(
                    &cmd,
                    steps,
                    line.as_mut_ptr(),
                    line.len(),
                    &mut len,
                    &mut err
                ),
                UPC_OK
            );
            let bytes: Vec<u8> = line[..len].iter().map(|c| c.to_ne_bytes()[0]).collect();
            d.bytes(&bytes);
            steps += 1;
        }
        upc_log_close(log);
        (format!("{:016x}", d.finish()), steps)
    }
}

#[test]
fn c_interface_replays_every_fixture_like_replay_run() {
    for name in ["kettle-7-12s.upl", "wrens-3-10s.upl", "drift-5-10s.upl"] {
        let path = fixture(name);
        let file = std::fs::File::open(&path).unwrap();
        let summary =
            replay::run::run_log(&path, std::io::BufReader::new(file), std::io::sink(), false)
                .unwrap();
        let (digest, steps) = c_digest(&path);
        assert_eq!(steps, summary.trace.steps, "{name}");
        assert_eq!(digest, summary.trace.trace_digest, "{name}");
    }
}

#[test]
fn storage_is_checked_and_instances_are_independent() {
    let mut err = no_error();
    let mut cfg = upc_config_default();
    let mut mem = storage();
    let raw = std::ptr::addr_of_mut!(mem.0).cast::<core::ffi::c_void>();
    // SAFETY: valid pointers; sizes as given.
    unsafe {
        assert_eq!(
            upc_navigator_init(raw, upc_navigator_size() - 1, &cfg, &mut err),
            UPC_ERR_STORAGE_SIZE
        );
        assert_eq!(text(&err.field), "size");
        let off = raw.cast::<u8>().add(1).cast::<core::ffi::c_void>();
        assert_eq!(
            upc_navigator_init(off, 90 * 1024, &cfg, &mut err),
            UPC_ERR_STORAGE_ALIGN
        );
        // No body yet: refused, naming the field; the storage then holds
        // no navigator.
        assert_eq!(
            upc_navigator_init(raw, 96 * 1024, &cfg, &mut err),
            UPC_ERR_BODY
        );
        assert_eq!(text(&err.field), "module_count");
        assert!(text(&err.message).contains("module_count = 0"));
        let nav = raw.cast::<UpcNavigator>();
        let frame = Box::new(MaybeUninit::<UpcFrame>::zeroed().assume_init());
        let mut cmd = UpcCommand::default();
        assert_eq!(
            upc_navigator_step(nav, &*frame, &mut cmd, &mut err),
            UPC_ERR_NOT_INITIALISED
        );
        assert_eq!(
            CStr::from_ptr(upc_error_name(err.code)).to_str().unwrap(),
            "UPC_ERR_NOT_INITIALISED"
        );

        // A body: three modules, the second with a bad radius.
        cfg.module_count = 3;
        for m in cfg.modules.iter_mut().take(3) {
            *m = UpcModule {
                length_m: 0.3,
                radius_m: 0.05,
            };
        }
        cfg.modules[1].radius_m = -0.01;
        assert_eq!(
            upc_navigator_init(raw, 96 * 1024, &cfg, &mut err),
            UPC_ERR_BODY
        );
        assert_eq!(text(&err.field), "modules[1].radius_m");
        cfg.modules[1].radius_m = 0.05;
        cfg.throat_stations = 1;
        assert_eq!(
            upc_navigator_init(raw, 96 * 1024, &cfg, &mut err),
            UPC_ERR_SETTING
        );
        assert_eq!(text(&err.field), "throat_stations");
        cfg.throat_stations = 4;
        cfg.probe_layout = 9;
        assert_eq!(
            upc_navigator_init(raw, 96 * 1024, &cfg, &mut err),
            UPC_ERR_ENUM
        );
        assert_eq!(text(&err.field), "probe_layout");
        cfg.probe_layout = UPC_PROBE_SEVEN_PORT;

        // Two navigators: stepping one leaves the other untouched.
        assert_eq!(upc_navigator_init(raw, 96 * 1024, &cfg, &mut err), UPC_OK);
        let mut mem2 = storage();
        let raw2 = std::ptr::addr_of_mut!(mem2.0).cast::<core::ffi::c_void>();
        assert_eq!(upc_navigator_init(raw2, 96 * 1024, &cfg, &mut err), UPC_OK);
        let nav2 = raw2.cast::<UpcNavigator>();
        let mut f = Box::new(MaybeUninit::<UpcFrame>::zeroed().assume_init());
        for k in 0..20 {
            f.time_s = 0.01 * f64::from(k);
            assert_eq!(upc_navigator_step(nav, &*f, &mut cmd, &mut err), UPC_OK);
        }
        assert_eq!(cmd.reason, UPC_REASON_HOLD_NO_POSE);
        assert_eq!(upc_navigator_counters(nav).steps, 20);
        assert_eq!(upc_navigator_counters(nav2).steps, 0);

        // A frame with the wrong port count is refused; nothing is stepped.
        f.has_ports = true;
        f.port_count = 5;
        assert_eq!(
            upc_navigator_step(nav, &*f, &mut cmd, &mut err),
            UPC_ERR_FRAME
        );
        assert_eq!(text(&err.field), "port_count");
        f.port_count = 7;
        f.contact_count = 65;
        assert_eq!(
            upc_navigator_step(nav, &*f, &mut cmd, &mut err),
            UPC_ERR_CAPACITY
        );
        assert_eq!(text(&err.field), "contact_count");
        assert_eq!(upc_navigator_counters(nav).steps, 20);
    }
}

#[test]
fn command_round_trips_through_the_c_struct() {
    // Every code the C struct can carry maps back; an unknown one is named.
    let mut c = UpcCommand {
        heading_map: [1.0, 0.0, 0.0],
        ..UpcCommand::default()
    };
    assert!(command_from_c(&c).is_ok());
    c.reason = 99;
    let f = command_from_c(&c).unwrap_err();
    assert_eq!(f.code, UPC_ERR_ENUM);
    assert_eq!(f.field.as_str(), "reason");
}

#[test]
fn config_from_header_json_matches_the_log_reader() {
    let path = fixture("wrens-3-10s.upl");
    let file = std::fs::File::open(&path).unwrap();
    let r = replay::log::LogReader::open(
        std::io::BufReader::new(file),
        replay::log::ReadOptions::default(),
    )
    .unwrap();
    let json = serde_json::to_vec(r.header()).unwrap();
    let mut err = no_error();
    let mut from_json = upc_config_default();
    let mut from_log = upc_config_default();
    let p = std::ffi::CString::new(path).unwrap();
    // SAFETY: valid pointers and lengths.
    unsafe {
        assert_eq!(
            upc_config_from_header_json(json.as_ptr().cast(), json.len(), &mut from_json, &mut err),
            UPC_OK,
            "{}",
            text(&err.message)
        );
        let log = upc_log_open(p.as_ptr(), &mut err);
        assert_eq!(upc_log_config(log, &mut from_log, &mut err), UPC_OK);
        upc_log_close(log);
    }
    assert_eq!(format!("{from_json:?}"), format!("{from_log:?}"));
    assert_eq!(from_json.probe_layout, UPC_PROBE_FIVE_PORT);
    assert_eq!(from_json.port_count, 5);
    assert!(from_json.module_count > 1 && from_json.sensor_count > 0);

    // Broken JSON: the code, and where.
    let bad = b"{\"robot\": [1, 2";
    // SAFETY: valid pointers and lengths.
    let code = unsafe {
        upc_config_from_header_json(bad.as_ptr().cast(), bad.len(), &mut from_json, &mut err)
    };
    assert_eq!(code, UPC_ERR_JSON);
    assert!(
        text(&err.message).contains("line 1 column"),
        "{}",
        text(&err.message)
    );
}
