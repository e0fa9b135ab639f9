//! Contact-to-cross-section update: one sensor frame with 32 contacts is
//! ingested into a 512-point tactile map, then the section at the middle of
//! the body is fitted (window, axis, projection, hyper fit, geometric
//! refinement, classification, ellipse when covered).
//!
//! Scenario (our own): a 4-module body, 0.25 m modules of radius 0.3 m,
//! snug in a 0.3 m pipe along +x, 8 sensors per module at 0.125 m around
//! the axis, creeping forward 5 mm and rolling 7 degrees per frame, so all
//! 32 sensors touch in every frame and the wall fills in around.
//!
//! Run: `cargo bench -p nav-core --bench tactile`.

use criterion::{Criterion, criterion_group, criterion_main};
use nav_core::body::{Body, BodyConfig, ModuleSpec, SensorSpec};
use nav_core::frame::{Contact, HeadPose, JointAngles, SensorFrame};
use nav_core::tactile::{SectionSettings, TactileConfig, TactileMap, fit_plane_section};
use std::hint::black_box;

type Frame = SensorFrame<0, 3, 32>;

fn body() -> Body<4, 32> {
    let mut c = BodyConfig::<4, 32>::uniform(
        4,
        ModuleSpec {
            length_m: 0.25,
            radius_m: 0.3,
        },
    );
    for m in 0..4u16 {
        for j in 0..8u16 {
            c.push_sensor(SensorSpec {
                module: m,
                axial_m: 0.125,
                angle_rad: f64::from(j) * std::f64::consts::FRAC_PI_4,
                cap_polar_rad: None,
            });
        }
    }
    Body::new(c).expect("valid body")
}

fn frame(k: u32) -> Frame {
    let t = f64::from(k) * 0.01;
    let roll = (f64::from(k) * 7.0).to_radians();
    let mut f = Frame::empty(t);
    f.pose = Some(HeadPose {
        position_m: [0.005 * f64::from(k), 0.0, 0.0],
        orientation_wxyz: [(0.5 * roll).cos(), (0.5 * roll).sin(), 0.0, 0.0],
        position_sigma_m: 0.002,
        attitude_sigma_rad: 0.002,
    });
    f.joints = Some([JointAngles::default(); 3]);
    for m in 0..4u16 {
        for j in 0..8u16 {
            f.push_contact(Contact {
                module: m,
                sensor: j,
                force_n: 3.0,
                normal_module: None,
            });
        }
    }
    f
}

fn bench(c: &mut Criterion) {
    let b = body();
    let settings = SectionSettings::default();
    let mut map = TactileMap::<512>::new(TactileConfig::default()).expect("config");
    // Warm history: 16 frames = 512 points.
    for k in 0..16 {
        map.ingest(&frame(k), &b).expect("ingest");
    }
    // What one section looks like after the warm-up.
    let f = frame(15);
    let poses = b
        .module_poses(&f.pose.expect("pose"), &f.joints.expect("joints"))
        .expect("poses");
    let station = b.station(&poses, 0.5).expect("station");
    let s = map.section_at(&station, &settings);
    println!(
        "section at mid-body: {} points, coverage {:.0} deg, circle {}, ellipse {}",
        s.plane.points,
        s.plane.coverage_rad.to_degrees(),
        matches!(s.plane.shape, nav_core::tactile::SectionShape::Circle(_)),
        s.plane.ellipse.is_some()
    );
    let frames: Vec<Frame> = (16..4096).map(frame).collect();
    let mut i = 0usize;
    c.bench_function("tactile_update_32_contacts", |bench| {
        bench.iter(|| {
            // Frames cycle; keep time increasing by shifting each lap.
            let mut f = frames[i % frames.len()];
            f.time_s += 100.0 * (i / frames.len()) as f64 + 1.0;
            i += 1;
            map.ingest(black_box(&f), &b).expect("ingest");
            let pose = f.pose.expect("pose");
            let joints = f.joints.expect("joints");
            let poses = b.module_poses(&pose, &joints).expect("poses");
            let station = b.station(&poses, 0.5).expect("station");
            black_box(map.section_at(&station, &settings))
        });
    });
    let pts: Vec<[f64; 2]> = (0..16)
        .map(|j| {
            let a = f64::from(j) * 0.2;
            [0.5 * a.cos(), 0.5 * a.sin()]
        })
        .collect();
    // The plane fit alone: 16 points on a 3-radian arc.
    c.bench_function("fit_plane_section_16_points", |bench| {
        bench.iter(|| black_box(fit_plane_section(black_box(&pts), &settings.fit)));
    });
}

criterion_group!(benches, bench);
criterion_main!(benches);
