//! Host-only helpers (feature `host`): read a log and its header, build a
//! configuration from the header's JSON, and write the decision-trace line
//! of a command exactly as `replay run` does. They allocate; the embedded
//! build has none of them.

use crate::{
    fail, ok, report, upc_config_default, Fault, UpcCommand, UpcConfig, UpcContact, UpcError,
    UpcFrame, UpcJoint, UpcModule, UpcPose, UpcSensor, UPC_END, UPC_ERR_BUFFER, UPC_ERR_CAPACITY,
    UPC_ERR_IO, UPC_ERR_JSON, UPC_ERR_LOG, UPC_ERR_NULL, UPC_FRAME, UPC_MAX_CONTACTS,
    UPC_MAX_JOINTS, UPC_MAX_MODULES, UPC_MAX_PORTS, UPC_MAX_SENSORS, UPC_PROBE_CUSTOM,
    UPC_PROBE_FIVE_PORT, UPC_PROBE_SEVEN_PORT,
};
use core::ffi::{c_char, CStr};
use replay::log::{LogHeader, LogReader, ReadOptions, Record};
use replay::record::{FrameRecord, ProbeLayoutSpec, RobotSpec};
use std::fs::File;
use std::io::BufReader;

/// An open log (host only). Opaque to C.
pub struct UpcLog {
    reader: LogReader<BufReader<File>>,
}

impl std::fmt::Debug for UpcLog {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("UpcLog").finish_non_exhaustive()
    }
}

/// A configuration from a log header: the robot and gas, mapped the way
/// `replay` maps them (so a C run matches `replay run`).
///
/// # Errors
/// A [`Fault`] when the robot does not fit this library's capacities.
pub fn config_from_header(h: &LogHeader) -> Result<UpcConfig, Fault> {
    let mut c = upc_config_default();
    config_from_robot(&h.robot, &mut c)?;
    c.gas_gamma = h.gas.gamma;
    c.gas_r_j_per_kg_k = h.gas.r_j_per_kg_k;
    Ok(c)
}

fn too_many(field: &str, got: usize, most: usize) -> Fault {
    Fault::new(
        UPC_ERR_CAPACITY,
        format_args!("{field}"),
        format_args!("the log's robot has {got} {field}; this library takes at most {most}"),
    )
}

fn config_from_robot(r: &RobotSpec, c: &mut UpcConfig) -> Result<(), Fault> {
    if r.modules.len() > UPC_MAX_MODULES {
        return Err(too_many("modules", r.modules.len(), UPC_MAX_MODULES));
    }
    let sensors: usize = r.modules.iter().map(|m| m.sensors.len()).sum();
    if sensors > UPC_MAX_SENSORS {
        return Err(too_many("sensors", sensors, UPC_MAX_SENSORS));
    }
    c.module_count = u32::try_from(r.modules.len()).unwrap_or(u32::MAX);
    c.sensor_count = u32::try_from(sensors).unwrap_or(u32::MAX);
    let mut k = 0usize;
    for (i, m) in r.modules.iter().enumerate() {
        if let Some(slot) = c.modules.get_mut(i) {
            *slot = UpcModule {
                length_m: m.length_m,
                radius_m: m.radius_m,
            };
        }
        for s in &m.sensors {
            if let Some(slot) = c.sensors.get_mut(k) {
                *slot = UpcSensor {
                    module: u16::try_from(i).unwrap_or(u16::MAX),
                    axial_m: s.axial_m,
                    angle_rad: s.angle_deg.to_radians(),
                    on_nose_cap: s.cap_polar_deg.is_some(),
                    cap_polar_rad: s.cap_polar_deg.map_or(0.0, f64::to_radians),
                };
            }
            k += 1;
        }
    }
    match &r.probe.layout {
        ProbeLayoutSpec::FivePort { cone_angle_deg } => {
            c.probe_layout = UPC_PROBE_FIVE_PORT;
            c.cone_angle_rad = cone_angle_deg.to_radians();
            c.port_count = 5;
        }
        ProbeLayoutSpec::SevenPort { cone_angle_deg } => {
            c.probe_layout = UPC_PROBE_SEVEN_PORT;
            c.cone_angle_rad = cone_angle_deg.to_radians();
            c.port_count = 7;
        }
        ProbeLayoutSpec::Custom { normals } => {
            if normals.len() > UPC_MAX_PORTS {
                return Err(too_many("ports", normals.len(), UPC_MAX_PORTS));
            }
            c.probe_layout = UPC_PROBE_CUSTOM;
            c.port_count = u32::try_from(normals.len()).unwrap_or(u32::MAX);
            for (slot, n) in c.port_normals.iter_mut().zip(normals) {
                *slot = *n;
            }
        }
    }
    c.port_noise_pa = r.probe.port_noise_pa;
    c.cruise_speed_m_per_s = r.max_speed_m_per_s;
    // NaN: five times the port noise, as `replay` sets it.
    c.min_dynamic_pressure_pa = f64::NAN;
    Ok(())
}

/// A log frame record as the C frame.
///
/// # Errors
/// A [`Fault`] when the frame has more joints, ports or contacts than the
/// C frame holds.
pub fn frame_to_c(f: &FrameRecord, out: &mut UpcFrame) -> Result<(), Fault> {
    let mut o = UpcFrame {
        time_s: f.time_s,
        has_pose: false,
        pose: UpcPose::default(),
        has_joints: false,
        joint_count: 0,
        joints: [UpcJoint::default(); UPC_MAX_JOINTS],
        has_ports: false,
        port_count: 0,
        port_pressures_pa: [0.0; UPC_MAX_PORTS],
        has_total_temperature: false,
        total_temperature_k: 0.0,
        has_contacts: false,
        contact_count: 0,
        contacts: [UpcContact::default(); UPC_MAX_CONTACTS],
    };
    if let Some(p) = &f.pose {
        o.has_pose = true;
        o.pose = UpcPose {
            position_m: p.position_m,
            orientation_wxyz: p.orientation_wxyz,
            position_sigma_m: p.position_sigma_m,
            attitude_sigma_rad: p.attitude_sigma_rad,
        };
    }
    if let Some(js) = &f.joints {
        if js.len() > UPC_MAX_JOINTS {
            return Err(too_many("joints", js.len(), UPC_MAX_JOINTS));
        }
        o.has_joints = true;
        o.joint_count = u32::try_from(js.len()).unwrap_or(u32::MAX);
        for (slot, j) in o.joints.iter_mut().zip(js) {
            *slot = UpcJoint {
                pitch_rad: j.pitch_rad,
                yaw_rad: j.yaw_rad,
            };
        }
    }
    if let Some(ps) = &f.port_pressures_pa {
        if ps.len() > UPC_MAX_PORTS {
            return Err(too_many("ports", ps.len(), UPC_MAX_PORTS));
        }
        o.has_ports = true;
        o.port_count = u32::try_from(ps.len()).unwrap_or(u32::MAX);
        for (slot, p) in o.port_pressures_pa.iter_mut().zip(ps) {
            *slot = *p;
        }
    }
    if let Some(t) = f.total_temperature_k {
        o.has_total_temperature = true;
        o.total_temperature_k = t;
    }
    if f.contacts.len() > UPC_MAX_CONTACTS {
        return Err(too_many("contacts", f.contacts.len(), UPC_MAX_CONTACTS));
    }
    o.has_contacts = f.contacts_reported;
    o.contact_count = u32::try_from(f.contacts.len()).unwrap_or(u32::MAX);
    for (slot, c) in o.contacts.iter_mut().zip(&f.contacts) {
        *slot = UpcContact {
            module: c.module,
            sensor: c.sensor,
            has_normal: c.normal_module.is_some(),
            force_n: c.force_n,
            normal_module: c.normal_module.unwrap_or([0.0; 3]),
        };
    }
    *out = o;
    Ok(())
}

/// Host only: a configuration from a log header's JSON text (`len` bytes,
/// UTF-8, no NUL needed): the robot, probe and gas, mapped as `replay`
/// maps them; every other field at its default.
///
/// # Safety
/// `json` is NULL or points to `len` readable bytes; `out` NULL or a
/// `UpcConfig`; `err` NULL or a `UpcError`.
#[no_mangle]
pub unsafe extern "C" fn upc_config_from_header_json(
    json: *const c_char,
    len: usize,
    out: *mut UpcConfig,
    err: *mut UpcError,
) -> i32 {
    // SAFETY: the caller passes NULL or a valid pointer.
    let Some(out) = (unsafe { out.as_mut() }) else {
        return fail(err, UPC_ERR_NULL, "out", format_args!("out is NULL"));
    };
    if json.is_null() {
        return fail(err, UPC_ERR_NULL, "json", format_args!("json is NULL"));
    }
    // SAFETY: non-NULL, `len` readable bytes by the caller's contract.
    let bytes = unsafe { std::slice::from_raw_parts(json.cast::<u8>(), len) };
    let header: LogHeader = match serde_json::from_slice(bytes) {
        Ok(h) => h,
        Err(e) => {
            return fail(
                err,
                UPC_ERR_JSON,
                "json",
                format_args!("header JSON, line {} column {}: {e}", e.line(), e.column()),
            );
        }
    };
    match config_from_header(&header) {
        Ok(c) => {
            *out = c;
            ok(err)
        }
        Err(f) => report(err, &f),
    }
}

/// Host only: open a log file (strict reading: damage is an error).
/// Returns NULL on error. Close it with `upc_log_close`.
///
/// # Safety
/// `path` is NULL or a NUL-terminated string; `err` NULL or a `UpcError`.
#[no_mangle]
pub unsafe extern "C" fn upc_log_open(path: *const c_char, err: *mut UpcError) -> *mut UpcLog {
    if path.is_null() {
        fail(err, UPC_ERR_NULL, "path", format_args!("path is NULL"));
        return std::ptr::null_mut();
    }
    // SAFETY: non-NULL and NUL-terminated by the caller's contract.
    let p = unsafe { CStr::from_ptr(path) }
        .to_string_lossy()
        .into_owned();
    let file = match File::open(&p) {
        Ok(f) => f,
        Err(e) => {
            fail(err, UPC_ERR_IO, "path", format_args!("{p}: {e}"));
            return std::ptr::null_mut();
        }
    };
    match LogReader::open(BufReader::new(file), ReadOptions::default()) {
        Ok(reader) => {
            ok(err);
            Box::into_raw(Box::new(UpcLog { reader }))
        }
        Err(e) => {
            fail(err, UPC_ERR_LOG, "path", format_args!("{p}: {e}"));
            std::ptr::null_mut()
        }
    }
}

/// Host only: the configuration the log's header describes (as
/// `upc_config_from_header_json`).
///
/// # Safety
/// `log` NULL or from `upc_log_open`; `out` NULL or a `UpcConfig`; `err`
/// NULL or a `UpcError`.
#[no_mangle]
pub unsafe extern "C" fn upc_log_config(
    log: *const UpcLog,
    out: *mut UpcConfig,
    err: *mut UpcError,
) -> i32 {
    // SAFETY: the caller passes NULL or valid pointers.
    let (Some(log), Some(out)) = (unsafe { log.as_ref() }, unsafe { out.as_mut() }) else {
        return fail(err, UPC_ERR_NULL, "log", format_args!("log or out is NULL"));
    };
    match config_from_header(log.reader.header()) {
        Ok(c) => {
            *out = c;
            ok(err)
        }
        Err(f) => report(err, &f),
    }
}

/// Host only: the next frame of the log into `out`. Returns `UPC_FRAME`
/// (1) when a frame was written, `UPC_END` (0) at the end of the log, or
/// an error code (negative). Event and end records are skipped.
///
/// # Safety
/// `log` NULL or from `upc_log_open`; `out` NULL or a `UpcFrame`; `err`
/// NULL or a `UpcError`.
#[no_mangle]
pub unsafe extern "C" fn upc_log_next_frame(
    log: *mut UpcLog,
    out: *mut UpcFrame,
    err: *mut UpcError,
) -> i32 {
    // SAFETY: the caller passes NULL or valid pointers.
    let (Some(log), Some(out)) = (unsafe { log.as_mut() }, unsafe { out.as_mut() }) else {
        return fail(err, UPC_ERR_NULL, "log", format_args!("log or out is NULL"));
    };
    loop {
        match log.reader.next_record() {
            Ok(Some(Record::Frame(f))) => {
                return match frame_to_c(&f, out) {
                    Ok(()) => {
                        ok(err);
                        UPC_FRAME
                    }
                    Err(fault) => report(err, &fault),
                };
            }
            Ok(Some(_)) => {}
            Ok(None) => {
                ok(err);
                return UPC_END;
            }
            Err(e) => return fail(err, UPC_ERR_LOG, "log", format_args!("{e}")),
        }
    }
}

/// Host only: close a log from `upc_log_open` (NULL is ignored).
///
/// # Safety
/// `log` is NULL or from `upc_log_open`, not closed before.
#[no_mangle]
pub unsafe extern "C" fn upc_log_close(log: *mut UpcLog) {
    if !log.is_null() {
        // SAFETY: from Box::into_raw in `upc_log_open`, closed once.
        drop(unsafe { Box::from_raw(log) });
    }
}

/// Host only: the decision-trace line of `command` as step `step`, exactly
/// the bytes `replay run` writes (JSON and a newline), into `buf`
/// (`cap` bytes; NUL-terminated when there is room). `*len` (when non-NULL)
/// gets the line's length without the NUL. The line is rebuilt from the C
/// struct alone, so a digest over these lines equal to `replay run`'s shows
/// that the struct carries every field of the command.
///
/// # Safety
/// `command` NULL or a `UpcCommand`; `buf` NULL or `cap` writable bytes;
/// `len` NULL or a `size_t`; `err` NULL or a `UpcError`.
#[no_mangle]
pub unsafe extern "C" fn upc_trace_line(
    command: *const UpcCommand,
    step: u64,
    buf: *mut c_char,
    cap: usize,
    len: *mut usize,
    err: *mut UpcError,
) -> i32 {
    // SAFETY: the caller passes NULL or a valid pointer.
    let Some(c) = (unsafe { command.as_ref() }) else {
        return fail(
            err,
            UPC_ERR_NULL,
            "command",
            format_args!("command is NULL"),
        );
    };
    let cmd = match crate::command_from_c(c) {
        Ok(x) => x,
        Err(f) => return report(err, &f),
    };
    let mut line = match serde_json::to_vec(&replay::run::TraceLine {
        step,
        command: &cmd,
    }) {
        Ok(v) => v,
        Err(e) => return fail(err, UPC_ERR_JSON, "command", format_args!("{e}")),
    };
    line.push(b'\n');
    // SAFETY: the caller passes NULL or a valid pointer.
    if let Some(l) = unsafe { len.as_mut() } {
        *l = line.len();
    }
    if buf.is_null() || cap < line.len() {
        return fail(
            err,
            UPC_ERR_BUFFER,
            "cap",
            format_args!("the line needs {} bytes, the buffer has {cap}", line.len()),
        );
    }
    // SAFETY: `buf` has `cap >= line.len()` writable bytes.
    unsafe {
        std::ptr::copy_nonoverlapping(line.as_ptr(), buf.cast::<u8>(), line.len());
        if cap > line.len() {
            buf.add(line.len()).write(0);
        }
    }
    ok(err)
}
