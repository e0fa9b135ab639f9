//! Write a log's frames in the compact layout the firmware example reads
//! (`firmware/src/frames.rs`), and print the command digest the host
//! navigator gives on them: the firmware must print the same.
//!
//! ```sh
//! cargo run -p nav-c --example firmware_frames -- fixtures/logs/kettle-7-12s.upl target/firmware-frames.bin
//! ```
//!
//! The digest is `nav_core::navigator::Command::digest_into` over every
//! step (FNV-1a 64), the core's own determinism digest: the JSON trace
//! digest of `replay run` needs serde_json, which the target does not have.
//!
//! Layout (little-endian): the configuration (the fields of
//! `nav_c::UpcConfig` in declaration order, counted arrays with only the
//! used entries: `u32` module count, per module length and radius `f64`;
//! `u32` sensor count, per sensor `u16` module, axial, angle and nose-cap
//! polar angle `f64` (NaN: a side-skin sensor);
//! joint sigma `f64`; `u32` layout; cone angle `f64`; `u32` port count,
//! its normals, 3 `f64` each; port noise, gamma, R, assumed temperature,
//! cruise speed, minimum dynamic pressure `f64`; section, throat cadence
//! and throat stations `u32`), then `u32` frame count; per frame
//! `f64` time, `u8` flags (1 pose, 2 joints, 4 ports, 8 total temperature, 16 contact channel reported),
//! then the present channels in that order (pose: 9 `f64`; joints: `u8`
//! count then pitch and yaw `f64` each; ports: one `f64` per port;
//! temperature: `f64`), then `u8` contact count and per contact `u16`
//! module, `u16` sensor, `f64` force, `u8` has-normal and, when set, 3
//! `f64`.

use nav_core::digest::Fnv64;
use nav_core::onboard::DemoFrameNavigator;
use replay::log::{LogReader, ReadOptions, Record};
use replay::record::FrameRecord;
use std::io::Write;

fn encode(f: &FrameRecord, out: &mut Vec<u8>) {
    out.extend_from_slice(&f.time_s.to_le_bytes());
    let mut flags = 0u8;
    if f.pose.is_some() {
        flags |= 1;
    }
    if f.joints.is_some() {
        flags |= 2;
    }
    if f.port_pressures_pa.is_some() {
        flags |= 4;
    }
    if f.total_temperature_k.is_some() {
        flags |= 8;
    }
    if f.contacts_reported {
        flags |= 16;
    }
    out.push(flags);
    if let Some(p) = &f.pose {
        for v in p
            .position_m
            .iter()
            .chain(&p.orientation_wxyz)
            .chain([&p.position_sigma_m, &p.attitude_sigma_rad])
        {
            out.extend_from_slice(&v.to_le_bytes());
        }
    }
    if let Some(js) = &f.joints {
        out.push(u8::try_from(js.len()).expect("joints fit a byte"));
        for j in js {
            out.extend_from_slice(&j.pitch_rad.to_le_bytes());
            out.extend_from_slice(&j.yaw_rad.to_le_bytes());
        }
    }
    if let Some(ps) = &f.port_pressures_pa {
        for p in ps {
            out.extend_from_slice(&p.to_le_bytes());
        }
    }
    if let Some(t) = f.total_temperature_k {
        out.extend_from_slice(&t.to_le_bytes());
    }
    out.push(u8::try_from(f.contacts.len()).expect("contacts fit a byte"));
    for c in &f.contacts {
        out.extend_from_slice(&c.module.to_le_bytes());
        out.extend_from_slice(&c.sensor.to_le_bytes());
        out.extend_from_slice(&c.force_n.to_le_bytes());
        match c.normal_module {
            Some(n) => {
                out.push(1);
                for v in n {
                    out.extend_from_slice(&v.to_le_bytes());
                }
            }
            None => out.push(0),
        }
    }
}

fn encode_config(c: &nav_c::UpcConfig, out: &mut Vec<u8>) {
    let f = |out: &mut Vec<u8>, v: f64| out.extend_from_slice(&v.to_le_bytes());
    let u = |out: &mut Vec<u8>, v: u32| out.extend_from_slice(&v.to_le_bytes());
    u(out, c.module_count);
    for m in c.modules.iter().take(c.module_count as usize) {
        f(out, m.length_m);
        f(out, m.radius_m);
    }
    u(out, c.sensor_count);
    for s in c.sensors.iter().take(c.sensor_count as usize) {
        out.extend_from_slice(&s.module.to_le_bytes());
        f(out, s.axial_m);
        f(out, s.angle_rad);
        // NaN: a side-skin sensor; otherwise its nose-cap polar angle.
        f(
            out,
            if s.on_nose_cap {
                s.cap_polar_rad
            } else {
                f64::NAN
            },
        );
    }
    f(out, c.joint_sigma_rad);
    u(out, c.probe_layout);
    f(out, c.cone_angle_rad);
    u(out, c.port_count);
    for n in c.port_normals.iter().take(c.port_count as usize) {
        for v in n {
            f(out, *v);
        }
    }
    for v in [
        c.port_noise_pa,
        c.gas_gamma,
        c.gas_r_j_per_kg_k,
        c.assumed_static_temperature_k,
        c.cruise_speed_m_per_s,
        c.min_dynamic_pressure_pa,
    ] {
        f(out, v);
    }
    u(out, c.section_every);
    u(out, c.throat_every);
    u(out, c.throat_stations);
}

fn digest_of<const P: usize>(cfg: &nav_c::UpcConfig, frames: &[FrameRecord]) -> (u64, u64) {
    // The navigator is built through the C configuration, as the firmware
    // builds its own (same mapping as `replay`).
    let mut nav = Box::new(
        DemoFrameNavigator::<P>::new(nav_c::onboard_config_for::<P>(cfg).expect("config"))
            .expect("navigator"),
    );
    let mut d = Fnv64::new();
    for f in frames {
        let frame = f.to_sensor_frame::<P, 7, 64>().expect("frame fits");
        nav.step(&frame).digest_into(&mut d);
    }
    (d.finish(), nav.counters().section_fits)
}

fn main() {
    let args: Vec<String> = std::env::args().collect();
    let (Some(input), Some(output)) = (args.get(1), args.get(2)) else {
        eprintln!("usage: firmware_frames LOG.upl OUT.bin [MAX_FRAMES]");
        std::process::exit(2);
    };
    let max: usize = args
        .get(3)
        .map_or(usize::MAX, |s| s.parse().expect("MAX_FRAMES"));
    let file = std::fs::File::open(input).expect("open log");
    let mut r =
        LogReader::open(std::io::BufReader::new(file), ReadOptions::default()).expect("log");
    let cfg = nav_c::config_from_header(r.header()).expect("header config");
    let mut frames = Vec::new();
    while let Some(rec) = r.next_record().expect("record") {
        if let Record::Frame(f) = rec {
            if frames.len() < max {
                frames.push(f);
            }
        }
    }
    let ports = cfg.port_count;
    let mut blob = Vec::new();
    encode_config(&cfg, &mut blob);
    blob.extend_from_slice(&u32::try_from(frames.len()).expect("count").to_le_bytes());
    for f in &frames {
        encode(f, &mut blob);
    }
    std::fs::File::create(output)
        .and_then(|mut o| o.write_all(&blob))
        .expect("write frames");
    let (digest, fits) = match ports {
        5 => digest_of::<5>(&cfg, &frames),
        7 => digest_of::<7>(&cfg, &frames),
        n => panic!("{n}-port probe"),
    };
    println!(
        "host_step frames={} bytes={} section_fits={fits} command_digest={digest:016x}",
        frames.len(),
        blob.len()
    );
}
