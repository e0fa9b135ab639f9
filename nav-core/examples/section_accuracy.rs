//! Cross-section fit accuracy and speed on noisy circular arcs.
//!
//! Sweeps arc coverage (60, 120, 180, 360 deg), point count (6, 16, 32) and
//! noise (1, 5 mm, isotropic Gaussian on each coordinate) on a 0.5 m
//! radius, with the points at angles drawn uniformly over the arc (where
//! contacts happen to land) around a centre offset up to 0.1 m. For each case it fits the same point sets with
//! - Kasa and the hyper-accurate algebraic fit (for comparison),
//! - the section pipeline (`fit_plane_section`: hyper, then
//!   Levenberg–Marquardt with the default settings, then classification),
//! - a geometric maximum-likelihood reference: Levenberg–Marquardt started
//!   from the TRUE circle, to tight tolerance (200 iterations, step 1e-14).
//!
//! Errors are RMS over the trials of the radius error (percent of the true
//! radius) and of the centre error (mm). The pipeline's error columns use
//! its geometric circle whatever the classification; `circ/lb/unk` say how
//! many trials it called a circle, a lower bound only, or unknown.
//!
//! Run: `cargo run --release -p nav-core --example section_accuracy`
//! Add `-- --dump FILE` to write the 16-point 180-degree 1 mm point sets
//! for `python3 tests/reference/section_reference.py --time FILE`.
//! The last line is machine-readable.

use nav_core::tactile::fit::{
    AlgebraicMethod, Circle, LmSettings, Point2, algebraic_circle, geometric_circle,
};
use nav_core::tactile::{SectionFitSettings, SectionShape, fit_plane_section};
use rand_chacha::ChaCha8Rng;
use rand_chacha::rand_core::{RngCore, SeedableRng};
use std::io::Write;
use std::time::Instant;

const RADIUS_M: f64 = 0.5;
const TRIALS: usize = 2000;

/// Uniform in (0, 1) from 53 random bits.
fn uniform(rng: &mut ChaCha8Rng) -> f64 {
    ((rng.next_u64() >> 11) as f64 + 0.5) / (1u64 << 53) as f64
}

/// Standard normal by Box–Muller with libm.
fn normal(rng: &mut ChaCha8Rng) -> f64 {
    let u1 = uniform(rng);
    let u2 = uniform(rng);
    libm::sqrt(-2.0 * libm::log(u1)) * libm::cos(core::f64::consts::TAU * u2)
}

struct Case {
    sets: Vec<Vec<Point2>>,
    centres: Vec<Point2>,
}

fn make_case(arc_deg: f64, n: usize, noise_m: f64, seed: u64) -> Case {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let span = arc_deg.to_radians();
    let mut sets = Vec::with_capacity(TRIALS);
    let mut centres = Vec::with_capacity(TRIALS);
    for _ in 0..TRIALS {
        let c = [
            0.2 * (uniform(&mut rng) - 0.5),
            0.2 * (uniform(&mut rng) - 0.5),
        ];
        let start = core::f64::consts::TAU * uniform(&mut rng);
        // Contacts land anywhere on the arc: angles uniform over it.
        let pts = (0..n)
            .map(|_| {
                let t = start + span * uniform(&mut rng);
                [
                    c[0] + RADIUS_M * libm::cos(t) + noise_m * normal(&mut rng),
                    c[1] + RADIUS_M * libm::sin(t) + noise_m * normal(&mut rng),
                ]
            })
            .collect();
        sets.push(pts);
        centres.push(c);
    }
    Case { sets, centres }
}

#[derive(Default)]
struct Errors {
    r2: f64,
    c2: f64,
    n: usize,
}

impl Errors {
    fn add(&mut self, fit: &Circle, centre: &Point2) {
        let dr = (fit.radius_m - RADIUS_M) / RADIUS_M;
        let dc = (fit.centre[0] - centre[0]).hypot(fit.centre[1] - centre[1]);
        self.r2 += dr * dr;
        self.c2 += dc * dc;
        self.n += 1;
    }
    fn r_pct(&self) -> f64 {
        100.0 * (self.r2 / self.n as f64).sqrt()
    }
    fn c_mm(&self) -> f64 {
        1000.0 * (self.c2 / self.n as f64).sqrt()
    }
}

fn ml_settings() -> LmSettings {
    LmSettings {
        max_iterations: 200,
        step_tolerance: 1e-14,
        cost_tolerance: 0.0,
    }
}

/// Median time per `fit_plane_section`, microseconds, over 21 passes of
/// all the case's point sets.
fn time_pipeline(case: &Case, settings: &SectionFitSettings) -> f64 {
    let mut runs = Vec::new();
    let mut sink = 0.0;
    for _ in 0..21 {
        let t0 = Instant::now();
        for pts in &case.sets {
            let s = fit_plane_section(std::hint::black_box(pts), settings);
            sink += s.coverage_rad;
        }
        runs.push(t0.elapsed().as_secs_f64() * 1e6 / case.sets.len() as f64);
    }
    std::hint::black_box(sink);
    runs.sort_by(f64::total_cmp);
    runs[10]
}

fn main() {
    let args: Vec<String> = std::env::args().collect();
    let dump = args
        .iter()
        .position(|a| a == "--dump")
        .and_then(|i| args.get(i + 1).cloned());
    let settings = SectionFitSettings::default();
    println!(
        "section_accuracy: radius {RADIUS_M} m, {TRIALS} trials per case, errors RMS over trials"
    );
    println!(
        "{:>4} {:>3} {:>3} | {:>8} {:>8} {:>8} {:>8} | {:>8} {:>8} | {:>6} {:>6} | {:>5} {:>5} {:>5}",
        "arc",
        "n",
        "mm",
        "kasa_r%",
        "hyper_r%",
        "pipe_r%",
        "ml_r%",
        "pipe_cmm",
        "ml_cmm",
        "r/ml",
        "c/ml",
        "circ",
        "lb",
        "unk"
    );
    let mut headline = None;
    let mut ml_runaway = 0;
    // (n, noise) -> pipeline radius error at 60 and 180 degrees.
    let mut short_vs_half: Vec<(usize, f64, f64, f64)> = Vec::new();
    let mut seed = 1u64;
    for arc in [60.0, 120.0, 180.0, 360.0] {
        for n in [6usize, 16, 32] {
            for noise_mm in [1.0, 5.0] {
                seed += 1;
                let case = make_case(arc, n, noise_mm * 1e-3, seed);
                let (mut kasa, mut hyper, mut pipe, mut ml) = (
                    Errors::default(),
                    Errors::default(),
                    Errors::default(),
                    Errors::default(),
                );
                let (mut circ, mut lb, mut unk) = (0, 0, 0);
                for (pts, c) in case.sets.iter().zip(&case.centres) {
                    if let Ok(k) = algebraic_circle(pts, AlgebraicMethod::Kasa) {
                        kasa.add(&k.circle, c);
                    }
                    if let Ok(h) = algebraic_circle(pts, AlgebraicMethod::Hyper) {
                        hyper.add(&h.circle, c);
                        if let Ok(g) = geometric_circle(pts, &h.circle, &settings.lm) {
                            pipe.add(&g.circle, c);
                        }
                    }
                    let truth = Circle {
                        centre: *c,
                        radius_m: RADIUS_M,
                    };
                    if let Ok(g) = geometric_circle(pts, &truth, &ml_settings()) {
                        ml.add(&g.circle, c);
                    }
                    match fit_plane_section(pts, &settings).shape {
                        SectionShape::Circle(_) => circ += 1,
                        SectionShape::LowerBoundOnly { .. } => lb += 1,
                        SectionShape::Unknown { .. } => unk += 1,
                    }
                }
                // The ML estimate itself runs off to huge radii on some
                // near-straight samples (6 points, 5 mm, short arcs): flag
                // rows where its RMS is dominated by that.
                let flag = if ml.r_pct() > 5.0 * pipe.r_pct() {
                    ml_runaway += 1;
                    " *"
                } else {
                    ""
                };
                println!(
                    "{:>4} {:>3} {:>3} | {:>8.3} {:>8.3} {:>8.3} {:>8.3} | {:>8.2} {:>8.2} | {:>6.3} {:>6.3} | {:>5} {:>5} {:>5}{}",
                    arc,
                    n,
                    noise_mm,
                    kasa.r_pct(),
                    hyper.r_pct(),
                    pipe.r_pct(),
                    ml.r_pct(),
                    pipe.c_mm(),
                    ml.c_mm(),
                    pipe.r_pct() / ml.r_pct(),
                    pipe.c_mm() / ml.c_mm(),
                    circ,
                    lb,
                    unk,
                    flag
                );
                if arc == 60.0 {
                    short_vs_half.push((n, noise_mm, pipe.r_pct(), f64::NAN));
                } else if arc == 180.0
                    && let Some(e) = short_vs_half
                        .iter_mut()
                        .find(|e| e.0 == n && e.1 == noise_mm)
                {
                    e.3 = pipe.r_pct();
                }
                if arc == 180.0 && n == 16 && noise_mm == 1.0 {
                    let us = time_pipeline(&case, &settings);
                    if let Some(path) = &dump {
                        let mut f = std::fs::File::create(path).expect("create dump file");
                        for pts in &case.sets {
                            let line: Vec<String> = pts
                                .iter()
                                .flat_map(|p| [format!("{:e}", p[0]), format!("{:e}", p[1])])
                                .collect();
                            writeln!(f, "{}", line.join(" ")).expect("write dump");
                        }
                    }
                    headline = Some((pipe.r_pct(), pipe.c_mm(), us, ml.r_pct(), ml.c_mm()));
                }
            }
        }
    }
    if ml_runaway > 0 {
        println!(
            "* {ml_runaway} rows: the ML reference (LM from the true circle to tight tolerance) \
             runs off to very large radii on some near-straight samples, so its RMS there is \
             no yardstick; the pipeline classifies many of those fits as lower-bound-only \
             (column lb)."
        );
    }
    println!(
        "60-degree arcs are far worse: radius error at 60 deg / at 180 deg, same points and noise:"
    );
    for (n, mm, e60, e180) in &short_vs_half {
        println!(
            "  n={n:>2} noise={mm} mm: {e60:.3} % / {e180:.3} % = {:.1}x",
            e60 / e180
        );
    }
    if let Some((r, c, us, mlr, mlc)) = headline {
        println!(
            "headline vs ML: radius {:.3} % vs {:.3} % ({:+.1} %), centre {:.3} mm vs {:.3} mm ({:+.1} %)",
            r,
            mlr,
            100.0 * (r / mlr - 1.0),
            c,
            mlc,
            100.0 * (c / mlc - 1.0)
        );
        println!(
            "section_accuracy points=16 arc_deg=180 noise_mm=1 radius_m=0.5 rms_radius_err_pct={r:.4} rms_center_err_mm={c:.4} us_per_fit={us:.3}"
        );
    }
}
