//! Per-step cost of the whole frame-level navigator
//! ([`nav_core::onboard::FrameNavigator`]: probe solve, tactile ingest,
//! section fits and openings, decision) on a long invented traverse, and,
//! on a line of its own, of the decision stage alone.
//!
//! The traverse (`tests/src/frame_scene.rs`): a robot of 8 modules with 32
//! contact pads and a 7-port probe (40 deg cone) crawls at 0.1 m/s and
//! 100 Hz up a gently winding, slowly narrowing circular conduit with a
//! side branch, pressed onto the wall and rocking, so 7 or 8 pads touch
//! in every frame. Port pressures come from the probe's own forward model
//! plus 0.5 Pa of noise; contacts from where the skin meets the wall; the
//! pose from the known path. Timing statistics cover only the steps taken
//! with a full map (station ring, wall index and tactile ring full); the
//! heap counter covers every step.
//!
//! Capacities: `CostFrameNavigator` = `FrameNavigator<7, 7, 32, 8, 32,
//! 111, 128, 256, 8>` (111 tactile points: the ridge seeker and the nearest-
//! wall candidates took the room of four, the stamp judge and the pose
//! check of `nav_core::trust` four more, the windowed flow estimate of
//! `nav_core::flow_window` nine more), held to the 64 KiB onboard
//! budget. The standard configuration that `replay` and the demos run
//! (`StandardFrameNavigator` = `FrameNavigator<7, 7, 48, 8, 48, 256, 128,
//! 512, 8>`) is measured too, on the same traverse, on a line of its own
//! (`standard_config ...`): its state is over 64 KiB, so it has its own
//! budget of 96 KiB (the host replay size; an onboard build that flies it
//! needs a part with that much RAM to spare; the 64 KiB budget stays the
//! one for `CostFrameNavigator`).
//!
//! Per-stage lines: the same frames run through a second, separately
//! timed copy of the stages (probe solver, tactile map, body kinematics,
//! section fit, openings, throat), so each stage's cost is measured on the
//! real data; "decision + glue" is the mean step minus the stages' means
//! weighted by how often the navigator runs them.
//!
//! `cargo run --release -p nav-core --example step_cost [frames] [decision_frames] [throat_every]`
//! Last line: `step_cost frames=.. median_ns=.. p99_ns=.. max_ns=..
//! heap_allocs=.. state_bytes=..`
#![allow(unsafe_code)] // a GlobalAlloc impl is unsafe by definition

#[path = "../../tests/src/nav_scene.rs"]
mod nav_scene;

#[path = "../../tests/src/frame_scene.rs"]
mod frame_scene;

use frame_scene::{CostFrameNavigator, FrameScene};
use nav_core::body::{Body, ModulePoses, Station};
use nav_core::frame::{HeadPose, JointAngles, SensorFrame};
use nav_core::gas::IdealGas;
use nav_core::map::{MAX_BRANCHES, WallIndex};
use nav_core::navigator::{Command, NavConfig, StandardNavigator};
use nav_core::onboard::FrameNavigator;
use nav_core::probe::ProbeSolver;
use nav_core::tactile::{
    OpeningReport, OpeningSettings, SectionEstimate, SectionSettings, SectionShape, TactileMap,
    ThroatSettings,
};
use nav_scene::{Rigid, Sim, chain_scene};
use std::alloc::{GlobalAlloc, Layout, System};
use std::hint::black_box;
use std::sync::atomic::{AtomicU64, Ordering};
use std::time::Instant;

struct Counting;
static ALLOCS: AtomicU64 = AtomicU64::new(0);

// SAFETY: forwards every call unchanged to `System`; the counter is atomic.
unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        ALLOCS.fetch_add(1, Ordering::Relaxed);
        // SAFETY: same contract as the caller's.
        unsafe { System.alloc(layout) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        // SAFETY: same contract as the caller's.
        unsafe { System.dealloc(ptr, layout) }
    }
    unsafe fn alloc_zeroed(&self, layout: Layout) -> *mut u8 {
        ALLOCS.fetch_add(1, Ordering::Relaxed);
        // SAFETY: same contract as the caller's.
        unsafe { System.alloc_zeroed(layout) }
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        ALLOCS.fetch_add(1, Ordering::Relaxed);
        // SAFETY: same contract as the caller's.
        unsafe { System.realloc(ptr, layout, new_size) }
    }
}

#[global_allocator]
static GLOBAL: Counting = Counting;

/// Tactile ring of the measured navigator (must match `CostFrameNavigator`).
const TW: usize = 111;

type Frame = SensorFrame<7, 7, 32>;

#[derive(Debug)]
struct Stats {
    n: usize,
    median: u64,
    p99: u64,
    max: u64,
    /// Mean of the calls at or below the 99th percentile (the machine is
    /// shared: a few preempted calls would dominate a plain mean).
    mean: f64,
}

fn stats(v: &mut [u64]) -> Stats {
    if v.is_empty() {
        return Stats {
            n: 0,
            median: 0,
            p99: 0,
            max: 0,
            mean: 0.0,
        };
    }
    v.sort_unstable();
    let n = v.len();
    let at = |q: f64| ((n as f64 - 1.0) * q).round() as usize;
    let kept = &v[..=at(0.99)];
    Stats {
        n,
        median: v[at(0.5)],
        p99: v[at(0.99)],
        max: v[n - 1],
        mean: kept.iter().map(|x| *x as f64).sum::<f64>() / kept.len() as f64,
    }
}

// One function per measured call, never inlined, so that callgrind can
// attribute instructions to them (`--toggle-collect=*frame_step*`, or the
// inclusive costs in `callgrind_annotate --inclusive=yes`).

#[inline(never)]
fn frame_step(nav: &mut CostFrameNavigator, f: &Frame) -> Command {
    nav.step(f)
}

#[inline(never)]
fn standard_step(
    nav: &mut nav_core::onboard::StandardFrameNavigator,
    f: &SensorFrame<7, 7, 48>,
) -> Command {
    nav.step(f)
}

/// The standard (replay and demo) configuration on the same traverse:
/// step times over the frames after the map is full, heap, state size.
fn standard_config(frames: usize) {
    use nav_core::onboard::StandardFrameNavigator;
    let mut scene = FrameScene::winding(42);
    let cfg = scene.onboard_config::<8, 48>();
    let mut nav: Box<StandardFrameNavigator> =
        Box::new(FrameNavigator::new(cfg).expect("valid onboard config"));
    let mut times: Vec<u64> = Vec::with_capacity(frames);
    let mut heap = 0u64;
    let mut full_at = None;
    for k in 0..frames {
        let f: SensorFrame<7, 7, 48> = scene.next_frame();
        let a0 = ALLOCS.load(Ordering::Relaxed);
        let t0 = Instant::now();
        let c = standard_step(&mut nav, black_box(&f));
        let dt = t0.elapsed().as_nanos() as u64;
        heap += ALLOCS.load(Ordering::Relaxed) - a0;
        black_box(c);
        let m = nav.navigator().map();
        let full = m.stations.len() == m.stations.capacity()
            && m.walls.len() == m.walls.capacity()
            && nav.tactile().len() == 256;
        if full && full_at.is_none() {
            full_at = Some(k);
        }
        if full_at.is_some() {
            times.push(dt);
        }
    }
    let st = stats(&mut times);
    let bytes = std::mem::size_of::<StandardFrameNavigator>();
    println!(
        "standard_config frames={} median_ns={} p99_ns={} max_ns={} heap_allocs={} state_bytes={} full_from_step={} (FrameNavigator<7, 7, 48, 8, 48, 256, 128, 512, 8>; budget 98304 bytes: {})",
        st.n,
        st.median,
        st.p99,
        st.max,
        heap,
        bytes,
        full_at.map_or(-1, |k| k as i64),
        if bytes <= 98_304 { "met" } else { "MISSED" }
    );
}

#[inline(never)]
fn stage_probe(s: &ProbeSolver<7>, p: &[f64; 7], t0: Option<f64>) -> bool {
    s.solve(p, t0).is_ok()
}

#[inline(never)]
fn stage_ingest(m: &mut TactileMap<TW>, f: &Frame, body: &Body<8, 32>) -> bool {
    m.ingest(f, body).is_ok()
}

#[inline(never)]
fn stage_kinematics(
    body: &Body<8, 32>,
    pose: &HeadPose,
    j: &[JointAngles; 7],
) -> Option<ModulePoses<8>> {
    body.module_poses(pose, j).ok()
}

#[inline(never)]
fn stage_section(m: &TactileMap<TW>, st: &Station, set: &SectionSettings) -> SectionEstimate {
    m.section_at(st, set)
}

#[inline(never)]
fn stage_openings(
    m: &TactileMap<TW>,
    est: &SectionEstimate,
    set: &SectionSettings,
    o: &OpeningSettings,
) -> usize {
    let r: OpeningReport<MAX_BRANCHES> = m.openings(est, set, o);
    r.count
}

#[inline(never)]
fn stage_throat(
    m: &TactileMap<TW>,
    list: &[Station],
    set: &SectionSettings,
    t: &ThroatSettings,
) -> Option<f64> {
    m.throat(list, set, t).min_clear_diameter_m
}

fn ns(d: std::time::Duration) -> u64 {
    u64::try_from(d.as_nanos()).unwrap_or(u64::MAX)
}

fn line(name: &str, s: &Stats, per_step: f64) {
    println!(
        "stage {name:<14} calls={:>7} median_ns={:>6} p99_ns={:>6} max_ns={:>9} mean99_ns={:>6.0} per_step_ns={:>5.0}",
        s.n,
        s.median,
        s.p99,
        s.max,
        s.mean,
        s.mean * per_step
    );
}

/// The decision stage alone, on the invented chain of legs (the figures
/// this example printed before it drove whole frames).
fn decision_only(max_frames: usize) {
    let cfg = NavConfig::for_robot(0.1).validate().expect("valid config");
    let mut nav = Box::new(StandardNavigator::new(cfg).expect("capacities"));
    let rigid = Rigid::new([0.2, 0.1, 1.0], 0.9, [100.0, -40.0, 7.0]);
    let mut sim = Sim::new(chain_scene(24), [0.0, 0.0, 0.0], rigid, 42, true);
    sim.wall_points = 32;
    let mut v: Vec<u64> = Vec::with_capacity(max_frames);
    let mut heap = 0u64;
    for _ in 0..max_frames {
        let o = sim.observe();
        let a0 = ALLOCS.load(Ordering::Relaxed);
        let t0 = Instant::now();
        let c = nav.step(&o);
        let dt = t0.elapsed();
        heap += ALLOCS.load(Ordering::Relaxed) - a0;
        v.push(ns(dt));
        sim.apply(&c);
        if sim.reached {
            break;
        }
    }
    let map = nav.map();
    let s = stats(&mut v);
    println!(
        "decision_only frames={} median_ns={} p99_ns={} max_ns={} heap_allocs={} state_bytes={} (Navigator<7, 32, 128, 512, 8> on the chain-of-legs scene; reached={} stations={}/{} wall_points={}/512)",
        s.n,
        s.median,
        s.p99,
        s.max,
        heap,
        std::mem::size_of::<StandardNavigator>(),
        sim.reached,
        map.stations.len(),
        map.stations.capacity(),
        map.walls.len(),
    );
}

fn main() {
    let frames: usize = std::env::args()
        .nth(1)
        .and_then(|a| a.parse().ok())
        .unwrap_or(120_000);
    let decision_frames: usize = std::env::args()
        .nth(2)
        .and_then(|a| a.parse().ok())
        .unwrap_or(100_000);

    // Optional: another throat cadence (default 8 steps; the trend runs on
    // the first step of each period without a section fit).
    let throat_every: Option<u32> = std::env::args().nth(3).and_then(|a| a.parse().ok());

    let mut scene = FrameScene::winding(42);
    let mut cfg = scene.onboard_config::<8, 32>();
    if let Some(te) = throat_every {
        cfg.throat_every = te;
    }
    let mut nav: Box<CostFrameNavigator> =
        Box::new(FrameNavigator::new(cfg).expect("valid onboard config"));

    // The shadow stages, same settings.
    let solver = ProbeSolver::new(cfg.probe_layout, IdealGas::DRY_AIR, cfg.probe).expect("probe");
    let body = Body::new(cfg.body).expect("body");
    let mut tmap = TactileMap::<TW>::new(cfg.tactile).expect("tactile");
    let head_arc = 0.5 * body.module(0).map_or(0.0, |m| m.length_m);
    let throat_stations = cfg.throat_stations;
    let span = (body.total_length_m() - head_arc).max(0.0);

    let mut total: Vec<u64> = Vec::with_capacity(frames);
    let mut total_fit: Vec<u64> = Vec::with_capacity(frames / 4 + 1);
    let mut total_other: Vec<u64> = Vec::with_capacity(frames);
    let mut t_probe: Vec<u64> = Vec::with_capacity(frames);
    let mut t_ingest: Vec<u64> = Vec::with_capacity(frames);
    let mut t_poses: Vec<u64> = Vec::with_capacity(frames);
    let mut t_section: Vec<u64> = Vec::with_capacity(frames / 4 + 1);
    let mut t_openings: Vec<u64> = Vec::with_capacity(frames / 4 + 1);
    let mut t_throat: Vec<u64> = Vec::with_capacity(frames / 8 + 1);
    let mut heap = 0u64;
    let mut full_at: Option<u64> = None;
    let mut shapes = [0u64; 3]; // circle, lower bound, unknown
    let mut radius_err_sum = 0.0;
    let mut radius_err_max: f64 = 0.0;
    let mut modes = [0u64; 5];
    let mut touching = 0u64;
    let mut lifted_off = 0u64;
    let mut over_hole = 0u64;
    let mut dropped = 0u64;
    let mut max_depth: f64 = 0.0;
    let mut fits_seen = 0u64;

    let section_every = u64::from(cfg.section_every);
    for _ in 0..frames {
        let f: Frame = scene.next_frame();
        let truth = *scene.truth();
        touching += truth.touching as u64;
        lifted_off += truth.pressed_lifted_off as u64;
        over_hole += truth.over_hole as u64;
        dropped += truth.dropped as u64;
        max_depth = max_depth.max(truth.max_depth_m);

        let full = full_at.is_some();
        let a0 = ALLOCS.load(Ordering::Relaxed);
        let t0 = Instant::now();
        let c = frame_step(&mut nav, black_box(&f));
        let dt = t0.elapsed();
        heap += ALLOCS.load(Ordering::Relaxed) - a0;
        black_box(&c);
        let step = nav.counters().steps;
        let fitted = nav.counters().section_fits > fits_seen;
        fits_seen = nav.counters().section_fits;
        if full {
            total.push(ns(dt));
            if fitted {
                total_fit.push(ns(dt));
            } else {
                total_other.push(ns(dt));
            }
            modes[c.mode as usize] += 1;
            if fitted && let Some(est) = nav.last_section() {
                match est.plane.shape {
                    SectionShape::Circle(circle) => {
                        shapes[0] += 1;
                        let e = (circle.radius_m - truth.radius_m).abs() / truth.radius_m;
                        radius_err_sum += e;
                        radius_err_max = radius_err_max.max(e);
                    }
                    SectionShape::LowerBoundOnly { .. } => shapes[1] += 1,
                    SectionShape::Unknown { .. } => shapes[2] += 1,
                }
            }
        }

        // Shadow stages on the same frame.
        if let Some(p) = f.port_pressures_pa.as_ref() {
            let t0 = Instant::now();
            let r = stage_probe(&solver, black_box(p), f.total_temperature_k);
            let d = t0.elapsed();
            black_box(&r);
            if full {
                t_probe.push(ns(d));
            }
        }
        let t0 = Instant::now();
        let r = stage_ingest(&mut tmap, black_box(&f), &body);
        let d = t0.elapsed();
        black_box(&r);
        if full {
            t_ingest.push(ns(d));
        }
        if let (Some(pose), Some(j)) = (f.pose.as_ref(), f.joints.as_ref()) {
            let t0 = Instant::now();
            let poses = stage_kinematics(&body, pose, j);
            let d = t0.elapsed();
            if full {
                t_poses.push(ns(d));
            }
            if let Some(poses) = poses
                && let Some(st) = body.station(&poses, head_arc)
            {
                if step % section_every == 0 {
                    let t0 = Instant::now();
                    let est = stage_section(&tmap, black_box(&st), &cfg.section);
                    let d = t0.elapsed();
                    let t1 = Instant::now();
                    let o = stage_openings(&tmap, black_box(&est), &cfg.section, &cfg.openings);
                    let d1 = t1.elapsed();
                    black_box(&o);
                    if full {
                        t_section.push(ns(d));
                        t_openings.push(ns(d1));
                    }
                }
                // What the throat trend costs when it runs (see the report:
                // with the default cadences it never does).
                if step % 8 == 6 {
                    let mut list = [st; 6];
                    let mut n = 0;
                    let denom = (throat_stations.max(2) - 1) as f64;
                    for i in 0..throat_stations {
                        let frac = i as f64 / denom;
                        if let Some(s) = body.station(&poses, head_arc + frac * 0.9 * span)
                            && n < list.len()
                        {
                            list[n] = s;
                            n += 1;
                        }
                    }
                    let t0 = Instant::now();
                    let th = stage_throat(&tmap, black_box(&list[..n]), &cfg.section, &cfg.throat);
                    let d = t0.elapsed();
                    black_box(&th);
                    if full {
                        t_throat.push(ns(d));
                    }
                }
            }
        }

        if full_at.is_none() {
            let map = nav.navigator().map();
            if map.stations.len() == map.stations.capacity()
                && map.walls.len() == map.walls.capacity()
                && nav.tactile().len() == TW
            {
                full_at = Some(step);
            }
        }
    }

    let map = nav.navigator().map();
    let ctr = nav.counters();
    let n_full = total.len() as f64;
    println!(
        "scene: frames={} full_map_from_step={} head_x_m={:.1} radius_m={:.4} stations={}/{} wall_points={}/{} tactile_points={}/{} junctions={} probe_errors={} tactile_errors={} section_fits={}",
        frames,
        full_at.map_or("never".to_string(), |s| s.to_string()),
        scene.truth().head_x_m,
        scene.truth().radius_m,
        map.stations.len(),
        map.stations.capacity(),
        map.walls.len(),
        map.walls.capacity(),
        nav.tactile().len(),
        TW,
        map.junctions.iter().count(),
        ctr.probe_errors,
        ctr.tactile_errors,
        ctr.section_fits,
    );
    println!(
        "contacts: touching_per_frame={:.2} pressed_pads_lifted_off={} pressed_pads_over_hole={} dropped={} max_pad_depth_mm={:.2}",
        touching as f64 / frames as f64,
        lifted_off,
        over_hole,
        dropped,
        1e3 * max_depth
    );
    println!(
        "sections (full map): circle={} lower_bound={} unknown={} circle_radius_err_mean={:.2}% max={:.2}%",
        shapes[0],
        shapes[1],
        shapes[2],
        100.0 * radius_err_sum / (shapes[0].max(1) as f64),
        100.0 * radius_err_max
    );
    println!(
        "modes (full map): nominal={} flow_degraded={} tactile_only={} flow_only={} hold={}",
        modes[0], modes[1], modes[2], modes[3], modes[4]
    );

    let fit_rate = 1.0 / section_every as f64;
    let sp = stats(&mut t_probe);
    let si = stats(&mut t_ingest);
    let sk = stats(&mut t_poses);
    let ss = stats(&mut t_section);
    let so = stats(&mut t_openings);
    let st = stats(&mut t_throat);
    let probe_rate = sp.n as f64 / n_full.max(1.0);
    line("probe_solve", &sp, probe_rate);
    line("tactile_ingest", &si, 1.0);
    line("kinematics", &sk, 1.0);
    line("section_fit", &ss, fit_rate);
    line("openings", &so, fit_rate);
    line("throat(4 fits)", &st, 1.0 / f64::from(cfg.throat_every));
    let sf = stats(&mut total_fit);
    let sn = stats(&mut total_other);
    println!(
        "step kind: with_section_fit n={} median_ns={} p99_ns={} | without n={} median_ns={} p99_ns={}",
        sf.n, sf.median, sf.p99, sn.n, sn.median, sn.p99
    );
    let stot = stats(&mut total);
    let staged = sp.mean * probe_rate + si.mean + sk.mean + (ss.mean + so.mean) * fit_rate;
    println!(
        "step mean99_ns={:.0} = stages above {:.0} + decision and glue (the rest) {:.0}",
        stot.mean,
        staged,
        stot.mean - staged
    );
    // FrameNavigator runs the throat trend once per throat period, on the
    // first step of it that has no section fit (never when every step fits
    // a section).
    let (se, te) = (u64::from(cfg.section_every), u64::from(cfg.throat_every));
    println!(
        "cadence: section_every={se} throat_every={te}: the throat trend {}",
        if se > 1 {
            "runs once per period on a step without a section fit (its cost is in the step figures)"
        } else {
            "never runs (every step fits a section)"
        }
    );

    decision_only(decision_frames);
    standard_config(frames);

    let bytes = std::mem::size_of::<CostFrameNavigator>();
    let mut missed = Vec::new();
    if stot.median > 5_000 {
        missed.push("median > 5 us");
    }
    if stot.p99 > 20_000 {
        missed.push("p99 > 20 us");
    }
    if heap != 0 {
        missed.push("heap_allocs != 0");
    }
    if bytes > 65_536 {
        missed.push("state_bytes > 65536");
    }
    println!(
        "capacities: FrameNavigator<P=7, J=7, C=32, M=8, S=32, TW={TW}, ST=128, W=256, JN=8>; targets (median <= 5 us, p99 <= 20 us, no heap, <= 65536 bytes): {}",
        if missed.is_empty() {
            "all met".to_string()
        } else {
            format!("MISSED: {}", missed.join(", "))
        }
    );
    println!(
        "step_cost frames={} median_ns={} p99_ns={} max_ns={} heap_allocs={} state_bytes={}",
        stot.n, stot.median, stot.p99, stot.max, heap, bytes
    );
}
