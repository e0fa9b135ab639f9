//! Non-nulling calibration tables for 5-hole and 7-hole probes.
//!
//! A probe held fixed in a known flow (a calibration sweep over pitch and
//! yaw at known total and static pressure) gives, at each point, a few
//! dimensionless coefficients formed from the port pressures. Onboard, the
//! same coefficients formed from measured pressures are looked up in the
//! table to recover the flow direction and the total and static pressures,
//! without rotating ("nulling") the probe.
//!
//! # Schemes
//! Ports are in preset order ([`super::ProbeLayout::five_port`],
//! [`super::ProbeLayout::seven_port`]): 0 is the tip, ring ports
//! `1..=M` at azimuths `(k-1) 360/M deg` measured from +y toward +z.
//!
//! - [`CalScheme::FiveHoleTreasterYocum`]: Treaster and Yocum, "The
//!   calibration and application of five-hole probes", ISA Transactions 18
//!   (1979). With `p_bar` the mean of the four side ports and the
//!   pseudo-dynamic pressure `D = p_0 - p_bar`: angle coefficients
//!   `(p_1 - p_3)/D` and `(p_2 - p_4)/D`, total-pressure coefficient
//!   `(p_0 - p_t)/D`, static coefficient `(p_bar - p_s)/D` (exact forms
//!   recalled; pairing of ports to our azimuths is ours).
//! - [`CalScheme::SevenHoleGallington`]: Gallington, "Measurement of very
//!   large flow angles with non-nulling seven-hole probes", USAFA-TR-80-17
//!   (1980), with the sector method as used by Gerner, Maurer and
//!   Gallington, "Non-nulling seven-hole probes for high angle flow
//!   measurement", Experiments in Fluids 2 (1984). Low-angle sector (tip
//!   port highest): `q = p_0 - mean(ring)`, `C_k = (p_k - p_{k+3})/q` for
//!   the three opposite pairs, angle coefficients `(2 C_1 + C_2 - C_3)/3`
//!   and `(C_2 + C_3)/sqrt(3)` (forms recalled).
//! - High-angle sectors (both schemes): when ring port `i` reads highest,
//!   with neighbours `i-` and `i+` (next lower and higher azimuth),
//!   `q_i = p_i - (p_{i-} + p_{i+})/2`, angle coefficients
//!   `(p_i - p_0)/q_i` and `(p_{i+} - p_{i-})/q_i`, total coefficient
//!   `(p_i - p_t)/q_i`, static coefficient `((p_{i-} + p_{i+})/2 - p_s)/q_i`
//!   (Gallington 1980 for the 7-hole head; for the 5-hole head the same
//!   form over its 4-port ring is our extension).
//!
//! # Evaluation
//! The sector is the highest-pressure port. Within it, the calibration
//! points around a trial direction are fitted by a weighted local
//! quadratic (tricube weights: the local regression of Cleveland 1979,
//! J. Am. Stat. Assoc. 74) giving the four coefficients as functions of
//! the direction's tangent-plane coordinates; Newton's method on that
//! local fit finds the direction whose coefficients match the measured
//! ones, the neighbourhood is re-centred there and the step repeated
//! (three passes). The total and static coefficients are read from the
//! same fit. Trial directions are the calibration points nearest in
//! coefficient space (up to four, since near the edge of the range the
//! coefficients saturate and the coefficient-space nearest can lie far off
//! in direction). Local least-squares fits over nearby calibration points
//! follow the practice of Gerner, Maurer and Gallington (1984) and Zilliac
//! (NASA TM-102200, 1989); fitting the forward map in direction
//! coordinates rather than the inverse map is our choice (it stays
//! well-conditioned where the coefficient grid is strongly anisotropic).
//! Directions are handled as unit vectors (Reichert and Wendt, NASA
//! TM-106458, 1994, calibrate in unit-vector components), so no angle wraps
//! or poles arise. A table holds one Mach number / Reynolds
//! number; compressible calibrations (Everett, Gerner and Durston 1983)
//! add Mach as a third table dimension, which is not done here. Calibrate
//! only over the range where the coefficients are one-to-one with the
//! direction: at large angles they saturate and eventually fold back (for
//! the sphere-model 7-port head with a 40 deg cone, beyond about 72 deg).
//!
//! Building a table needs `std` ([`build_table`]); evaluating it
//! ([`CalTable::evaluate`]) works from caller-provided `&[CalPoint]`
//! storage and allocates nothing.

use nalgebra::{SMatrix, SVector, Vector3};

/// Which published coefficient scheme a table uses.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum CalScheme {
    /// 5-hole head (tip + 4 ring ports), Treaster and Yocum (1979).
    FiveHoleTreasterYocum,
    /// 7-hole head (tip + 6 ring ports), Gallington (1980); Gerner, Maurer
    /// and Gallington (1984).
    SevenHoleGallington,
}

impl CalScheme {
    /// Ports the scheme needs.
    #[must_use]
    pub const fn ports(self) -> usize {
        match self {
            Self::FiveHoleTreasterYocum => 5,
            Self::SevenHoleGallington => 7,
        }
    }

    /// Number of sectors (tip plus one per ring port).
    #[must_use]
    pub const fn sectors(self) -> usize {
        self.ports()
    }
}

/// A sweep sample also joins the sectors of ports reading within this
/// fraction of its pressure spread below its highest port (overlapping
/// sectors, so boundary queries are interpolated, not extrapolated).
pub const SECTOR_OVERLAP: f64 = 0.2;

/// Nearest calibration points used in each local fit.
pub const NEIGHBOURS: usize = 16;
/// Terms of the local quadratic.
const TERMS: usize = 6;

/// One calibration point, as stored in a table.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CalPoint {
    /// Sector: 0 when the tip port read highest, `k` when ring port `k` did.
    pub sector: u8,
    /// The sector's two angle coefficients.
    pub coeff: [f64; 2],
    /// Known flow direction (unit velocity vector, probe frame).
    pub velocity_unit: [f64; 3],
    /// Total-pressure coefficient `(p_ref - p_t)/q_sector`.
    pub total_coeff: f64,
    /// Static-pressure coefficient `(p_bar - p_s)/q_sector`.
    pub static_coeff: f64,
}

/// One point of a calibration sweep (known flow, measured pressures).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CalSample<const N: usize> {
    /// Known flow direction (unit velocity vector, probe frame).
    pub velocity_unit: [f64; 3],
    /// Known total pressure, Pa.
    pub total_pressure_pa: f64,
    /// Known static pressure, Pa.
    pub static_pressure_pa: f64,
    /// Measured port pressures, Pa, preset order.
    pub pressures_pa: [f64; N],
}

/// What a table lookup gives.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CalEstimate {
    /// Flow direction (unit velocity vector, probe frame).
    pub velocity_unit: Vector3<f64>,
    /// Total pressure, Pa.
    pub total_pressure_pa: f64,
    /// Static pressure, Pa.
    pub static_pressure_pa: f64,
    /// Sector used.
    pub sector: u8,
    /// Coefficient-space distance to the farthest neighbour used: a large
    /// value means the table is sparse (or the point lies outside it) here.
    pub support_radius: f64,
}

/// Why a calibration operation failed.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum CalError {
    /// Pressure count differs from the scheme's.
    PortCount {
        /// Pressures given.
        got: usize,
        /// Ports the scheme needs.
        expected: usize,
    },
    /// A pressure is NaN, infinite, zero or negative.
    BadPressure {
        /// Port index.
        port: usize,
    },
    /// The sector's pseudo-dynamic pressure is not positive (no flow, or
    /// pressures inconsistent with a flow).
    NoDynamicPressure {
        /// Sector.
        sector: u8,
    },
    /// A table point is not finite, has a sector out of range, or the
    /// points are not sorted by sector.
    BadPoint {
        /// Index in the table.
        index: usize,
    },
    /// A sweep sample has a non-finite or non-unit direction or pressure.
    BadSample {
        /// Index in the sweep.
        index: usize,
    },
    /// The sector has fewer calibration points than a local fit needs.
    SparseSector {
        /// Sector.
        sector: u8,
        /// Points it has.
        points: usize,
        /// Points needed.
        needed: usize,
    },
    /// The neighbouring points do not support a local fit (collinear).
    Singular {
        /// Sector.
        sector: u8,
    },
}

/// Sector, coefficients and the pressures the coefficients refer to.
#[derive(Debug, Clone, Copy, PartialEq)]
struct Coefficients {
    sector: u8,
    coeff: [f64; 2],
    q: f64,
    p_ref: f64,
    p_bar: f64,
}

fn get(p: &[f64], k: usize) -> f64 {
    p.get(k).copied().unwrap_or(f64::NAN)
}

fn check_pressures(scheme: CalScheme, p: &[f64]) -> Result<(), CalError> {
    let n = scheme.ports();
    if p.len() != n {
        return Err(CalError::PortCount {
            got: p.len(),
            expected: n,
        });
    }
    for (port, &x) in p.iter().enumerate() {
        if !(x.is_finite() && x > 0.0) {
            return Err(CalError::BadPressure { port });
        }
    }
    Ok(())
}

/// Index of the highest port (lowest index wins a tie: deterministic).
fn highest(p: &[f64]) -> usize {
    let mut sector = 0usize;
    let mut best = get(p, 0);
    for (k, &x) in p.iter().enumerate().skip(1) {
        if x > best {
            best = x;
            sector = k;
        }
    }
    sector
}

fn coefficients(scheme: CalScheme, p: &[f64]) -> Result<Coefficients, CalError> {
    check_pressures(scheme, p)?;
    coefficients_in_sector(scheme, p, highest(p))
}

/// The coefficients of `sector` (whether or not its port is the highest).
fn coefficients_in_sector(
    scheme: CalScheme,
    p: &[f64],
    sector: usize,
) -> Result<Coefficients, CalError> {
    let n = scheme.ports();
    let ring = n - 1;
    let sector_u8 = u8::try_from(sector).unwrap_or(u8::MAX);
    let c = if sector == 0 {
        let p_bar = p.iter().skip(1).sum::<f64>() / f64::from(super::layout::small(ring));
        let p0 = get(p, 0);
        let q = p0 - p_bar;
        if q.is_nan() || q <= 0.0 {
            return Err(CalError::NoDynamicPressure { sector: 0 });
        }
        let coeff = match scheme {
            CalScheme::FiveHoleTreasterYocum => {
                [(get(p, 1) - get(p, 3)) / q, (get(p, 2) - get(p, 4)) / q]
            }
            CalScheme::SevenHoleGallington => {
                let c1 = (get(p, 1) - get(p, 4)) / q;
                let c2 = (get(p, 2) - get(p, 5)) / q;
                let c3 = (get(p, 3) - get(p, 6)) / q;
                [(2.0 * c1 + c2 - c3) / 3.0, (c2 + c3) / libm::sqrt(3.0)]
            }
        };
        Coefficients {
            sector: 0,
            coeff,
            q,
            p_ref: p0,
            p_bar,
        }
    } else {
        // Ring neighbours, cyclic in 1..=ring.
        let minus = if sector == 1 { ring } else { sector - 1 };
        let plus = if sector == ring { 1 } else { sector + 1 };
        let (pi, pm, pp) = (get(p, sector), get(p, minus), get(p, plus));
        let p_bar = 0.5 * (pm + pp);
        let q = pi - p_bar;
        if q.is_nan() || q <= 0.0 {
            return Err(CalError::NoDynamicPressure { sector: sector_u8 });
        }
        Coefficients {
            sector: sector_u8,
            coeff: [(pi - get(p, 0)) / q, (pp - pm) / q],
            q,
            p_ref: pi,
            p_bar,
        }
    };
    Ok(c)
}

/// Cholesky factor of `a` when its pivots are not tiny against its scale.
fn well_conditioned_cholesky<const D: usize>(
    a: SMatrix<f64, D, D>,
) -> Option<nalgebra::Cholesky<f64, nalgebra::Const<D>>> {
    let scale = a.diagonal().max();
    let ch = a.cholesky()?;
    let l = ch.l_dirty().diagonal().min();
    if scale > 0.0 && l * l > 1e-12 * scale {
        Some(ch)
    } else {
        None
    }
}

/// A calibration table over caller-provided storage.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CalTable<'a> {
    scheme: CalScheme,
    points: &'a [CalPoint],
}

impl<'a> CalTable<'a> {
    /// A table of `points` (sorted by sector, as [`build_table`] leaves
    /// them) for `scheme`.
    ///
    /// # Errors
    /// [`CalError::BadPoint`] for a non-finite point, a sector outside the
    /// scheme, or points not sorted by sector.
    pub fn new(scheme: CalScheme, points: &'a [CalPoint]) -> Result<Self, CalError> {
        let mut last = 0u8;
        for (index, pt) in points.iter().enumerate() {
            let finite = pt.coeff.iter().all(|v| v.is_finite())
                && pt.velocity_unit.iter().all(|v| v.is_finite())
                && pt.total_coeff.is_finite()
                && pt.static_coeff.is_finite();
            if !finite || usize::from(pt.sector) >= scheme.sectors() || pt.sector < last {
                return Err(CalError::BadPoint { index });
            }
            last = pt.sector;
        }
        Ok(Self { scheme, points })
    }

    /// The scheme.
    #[must_use]
    pub const fn scheme(&self) -> CalScheme {
        self.scheme
    }

    /// The stored points.
    #[must_use]
    pub const fn points(&self) -> &'a [CalPoint] {
        self.points
    }

    /// Flow direction, total and static pressure from measured port
    /// pressures (preset order). No allocation.
    ///
    /// # Errors
    /// [`CalError::PortCount`], [`CalError::BadPressure`],
    /// [`CalError::NoDynamicPressure`], [`CalError::SparseSector`],
    /// [`CalError::Singular`].
    pub fn evaluate(&self, pressures_pa: &[f64]) -> Result<CalEstimate, CalError> {
        let c = coefficients(self.scheme, pressures_pa)?;
        let lo = self.points.partition_point(|p| p.sector < c.sector);
        let hi = self.points.partition_point(|p| p.sector <= c.sector);
        let sector_points = self.points.get(lo..hi).unwrap_or(&[]);
        if sector_points.len() < NEIGHBOURS {
            return Err(CalError::SparseSector {
                sector: c.sector,
                points: sector_points.len(),
                needed: NEIGHBOURS,
            });
        }
        // Start from the calibration points nearest in coefficient space
        // (several, because near the edge of the range the coefficients
        // saturate and the nearest in coefficient space may lie far away in
        // direction); keep the first start whose local inversion lands
        // inside its own neighbourhood, else the one with the smallest
        // coefficient mismatch.
        let (starts, _) = nearest::<START_CANDIDATES, _>(sector_points, |pt| {
            let du = pt.coeff[0] - c.coeff[0];
            let dv = pt.coeff[1] - c.coeff[1];
            du * du + dv * dv
        });
        let mut best: Option<(f64, CalEstimate)> = None;
        for &s in &starts {
            let Some(start) = sector_points.get(s) else {
                continue;
            };
            let Some((est, mismatch, inside)) =
                invert_from(sector_points, &c, vec3(start.velocity_unit))
            else {
                continue;
            };
            if inside {
                return Ok(est);
            }
            if best.is_none_or(|(m, _)| mismatch < m) {
                best = Some((mismatch, est));
            }
        }
        best.map(|(_, e)| e)
            .ok_or(CalError::Singular { sector: c.sector })
    }
}

fn vec3(v: [f64; 3]) -> Vector3<f64> {
    Vector3::new(v[0], v[1], v[2])
}

/// Coefficient-space starts tried per evaluation.
const START_CANDIDATES: usize = 4;
/// Re-centring passes of one inversion.
const RECENTRE_PASSES: usize = 3;
/// Newton iterations on one local forward fit.
const NEWTON_ITERATIONS: usize = 12;

/// The `K` points with the smallest `key` (ties: earliest), with their
/// keys, by insertion into a sorted fixed array (unfilled slots keep an
/// infinite key).
fn nearest<const K: usize, F: Fn(&CalPoint) -> f64>(
    points: &[CalPoint],
    key: F,
) -> ([usize; K], [f64; K]) {
    let mut near_d = [f64::INFINITY; K];
    let mut near_i = [0usize; K];
    for (i, pt) in points.iter().enumerate() {
        let d = key(pt);
        let last = near_d.last().copied().unwrap_or(f64::INFINITY);
        if d.is_nan() || d >= last {
            continue;
        }
        let mut slot = K.saturating_sub(1);
        while slot > 0 {
            let (Some(&pd), Some(&pi)) = (near_d.get(slot - 1), near_i.get(slot - 1)) else {
                break;
            };
            if pd <= d {
                break;
            }
            if let (Some(x), Some(y)) = (near_d.get_mut(slot), near_i.get_mut(slot)) {
                *x = pd;
                *y = pi;
            }
            slot -= 1;
        }
        if let (Some(x), Some(y)) = (near_d.get_mut(slot), near_i.get_mut(slot)) {
            *x = d;
            *y = i;
        }
    }
    (near_i, near_d)
}

/// Tangent basis at unit vector `v`.
fn basis(v: &Vector3<f64>) -> (Vector3<f64>, Vector3<f64>) {
    let helper = if libm::fabs(v.z) < 0.9 {
        Vector3::new(0.0, 0.0, 1.0)
    } else {
        Vector3::new(1.0, 0.0, 0.0)
    };
    let e1 = helper.cross(v);
    let e1 = e1 / e1.norm();
    (e1, v.cross(&e1))
}

/// Local forward model about a centre direction: the four coefficients
/// (two angle, total, static) as quadratics in the tangent-plane
/// coordinates `(x, y)` of the direction.
#[derive(Debug, Clone, Copy)]
struct LocalForward {
    centre: Vector3<f64>,
    e1: Vector3<f64>,
    e2: Vector3<f64>,
    /// Rows: terms `1, x, y, x^2, x y, y^2`; columns: the four coefficients.
    beta: SMatrix<f64, TERMS, 4>,
    /// Tangent-plane radius of the neighbourhood.
    radius: f64,
}

impl LocalForward {
    fn fit(points: &[CalPoint], centre: Vector3<f64>) -> Option<Self> {
        let (idx, keys) =
            nearest::<NEIGHBOURS, _>(points, |pt| 1.0 - vec3(pt.velocity_unit).dot(&centre));
        let (e1, e2) = basis(&centre);
        let mut radius = 0.0f64;
        let mut coords = [(0.0, 0.0); NEIGHBOURS];
        for (xy, &i) in coords.iter_mut().zip(idx.iter()) {
            let pt = points.get(i)?;
            let v = vec3(pt.velocity_unit);
            let dot = v.dot(&centre);
            if dot <= 0.0 {
                return None;
            }
            // Gnomonic coordinates: smooth, and exact on the tangent plane.
            *xy = (v.dot(&e1) / dot, v.dot(&e2) / dot);
            radius = radius.max(libm::sqrt(xy.0 * xy.0 + xy.1 * xy.1));
        }
        let h = if radius > 0.0 { radius } else { return None };
        let key_max = keys
            .iter()
            .copied()
            .filter(|k| k.is_finite())
            .fold(0.0f64, f64::max);
        let key_scale = 1.1 * key_max;
        let mut a = SMatrix::<f64, TERMS, TERMS>::zeros();
        let mut rhs = SMatrix::<f64, TERMS, 4>::zeros();
        let mut a_lin = SMatrix::<f64, 3, 3>::zeros();
        let mut rhs_lin = SMatrix::<f64, 3, 4>::zeros();
        for ((&i, &k), &(x, y)) in idx.iter().zip(keys.iter()).zip(coords.iter()) {
            let pt = points.get(i)?;
            if !k.is_finite() {
                return None;
            }
            let (u, v) = (x / h, y / h);
            let r = if key_scale > 0.0 {
                libm::sqrt(k / key_scale)
            } else {
                0.0
            };
            let t = 1.0 - r * r * r;
            let w = t * t * t;
            let target = SMatrix::<f64, 1, 4>::new(
                pt.coeff[0],
                pt.coeff[1],
                pt.total_coeff,
                pt.static_coeff,
            );
            let phi = SVector::<f64, TERMS>::from([1.0, u, v, u * u, u * v, v * v]);
            a.ger(w, &phi, &phi, 1.0);
            rhs += phi * target * w;
            let phi_lin = SVector::<f64, 3>::new(1.0, u, v);
            a_lin.ger(w, &phi_lin, &phi_lin, 1.0);
            rhs_lin += phi_lin * target * w;
        }
        // A local quadratic; where the neighbours cannot support one (all
        // on two lines of the sweep, e.g. against a sector edge), a plane.
        let mut beta = match well_conditioned_cholesky(a) {
            Some(ch) => ch.solve(&rhs),
            None => {
                let lin = well_conditioned_cholesky(a_lin)?.solve(&rhs_lin);
                let mut b = SMatrix::<f64, TERMS, 4>::zeros();
                for (mut dst, src) in b.row_iter_mut().zip(lin.row_iter()) {
                    dst.copy_from(&src);
                }
                b
            }
        };
        // Undo the 1/h scaling of the coordinates in the coefficients.
        let scales = [
            1.0,
            1.0 / h,
            1.0 / h,
            1.0 / (h * h),
            1.0 / (h * h),
            1.0 / (h * h),
        ];
        for (mut row, s) in beta.row_iter_mut().zip(scales) {
            row *= s;
        }
        Some(Self {
            centre,
            e1,
            e2,
            beta,
            radius,
        })
    }

    /// Coefficients at `(x, y)` and the 2x2 Jacobian of the angle pair.
    fn eval(&self, x: f64, y: f64) -> (SMatrix<f64, 1, 4>, nalgebra::Matrix2<f64>) {
        let phi = SMatrix::<f64, 1, TERMS>::from([[1.0], [x], [y], [x * x], [x * y], [y * y]]);
        let val = phi * self.beta;
        let dx = SMatrix::<f64, 1, TERMS>::from([[0.0], [1.0], [0.0], [2.0 * x], [y], [0.0]])
            * self.beta;
        let dy = SMatrix::<f64, 1, TERMS>::from([[0.0], [0.0], [1.0], [0.0], [x], [2.0 * y]])
            * self.beta;
        let j = nalgebra::Matrix2::new(dx.x, dy.x, dx.y, dy.y);
        (val, j)
    }

    fn direction(&self, x: f64, y: f64) -> Vector3<f64> {
        let v = self.centre + self.e1 * x + self.e2 * y;
        v / v.norm()
    }
}

/// Invert the table locally starting at `start`: returns the estimate, the
/// remaining coefficient mismatch, and whether the solution lies inside the
/// neighbourhood it was fitted on.
fn invert_from(
    points: &[CalPoint],
    c: &Coefficients,
    start: Vector3<f64>,
) -> Option<(CalEstimate, f64, bool)> {
    let mut centre = start;
    let mut result = None;
    for _ in 0..RECENTRE_PASSES {
        let f = LocalForward::fit(points, centre)?;
        let (mut x, mut y) = (0.0, 0.0);
        let mut mismatch = f64::INFINITY;
        for _ in 0..NEWTON_ITERATIONS {
            let (val, j) = f.eval(x, y);
            let r = nalgebra::Vector2::new(c.coeff[0] - val.x, c.coeff[1] - val.y);
            mismatch = r.norm();
            let step = j.try_inverse()? * r;
            // Keep Newton within twice the neighbourhood.
            let len = step.norm();
            let cap = f.radius;
            let step = if len > cap { step * (cap / len) } else { step };
            x += step.x;
            y += step.y;
            if len < 1e-12 {
                break;
            }
        }
        let (val, _) = f.eval(x, y);
        let inside = libm::sqrt(x * x + y * y) <= f.radius;
        let v = f.direction(x, y);
        result = Some((
            CalEstimate {
                velocity_unit: v,
                total_pressure_pa: c.p_ref - val.z * c.q,
                static_pressure_pa: c.p_bar - val.w * c.q,
                sector: c.sector,
                support_radius: f.radius,
            },
            mismatch,
            inside,
        ));
        if !mismatch.is_finite() {
            return None;
        }
        centre = v;
    }
    result
}

/// Build a table from a calibration sweep (host only).
///
/// The points come back sorted by sector (stable: sweep order within a
/// sector), ready for [`CalTable::new`]. A sample near a sector boundary
/// appears once in each sector it borders ([`SECTOR_OVERLAP`]). Store them anywhere, e.g. as a
/// `static` array for the target.
///
/// # Errors
/// [`CalError::PortCount`] when `N` is not the scheme's port count;
/// [`CalError::BadSample`] for a bad known flow; [`CalError::BadPressure`]
/// or [`CalError::NoDynamicPressure`] for unusable pressures.
#[cfg(feature = "std")]
pub fn build_table<const N: usize>(
    scheme: CalScheme,
    samples: &[CalSample<N>],
) -> Result<std::vec::Vec<CalPoint>, CalError> {
    if N != scheme.ports() {
        return Err(CalError::PortCount {
            got: N,
            expected: scheme.ports(),
        });
    }
    let mut out = std::vec::Vec::with_capacity(samples.len());
    for (index, s) in samples.iter().enumerate() {
        let [x, y, z] = s.velocity_unit;
        let norm = libm::sqrt(x * x + y * y + z * z);
        if !(norm.is_finite()
            && libm::fabs(norm - 1.0) < 1e-9
            && s.total_pressure_pa.is_finite()
            && s.static_pressure_pa.is_finite())
        {
            return Err(CalError::BadSample { index });
        }
        let p = &s.pressures_pa;
        check_pressures(scheme, p)?;
        // The sample joins its own sector and every sector whose port reads
        // within SECTOR_OVERLAP of the spread of the highest one, so that a
        // query near a sector boundary has support on both sides.
        let top = highest(p);
        let p_max = get(p, top);
        let p_min = p.iter().copied().fold(f64::INFINITY, f64::min);
        let margin = SECTOR_OVERLAP * (p_max - p_min);
        for (sector, &ps) in p.iter().enumerate() {
            if sector != top && ps < p_max - margin {
                continue;
            }
            let c = match coefficients_in_sector(scheme, p, sector) {
                Ok(c) => c,
                Err(e) if sector == top => return Err(e),
                Err(_) => continue,
            };
            out.push(CalPoint {
                sector: c.sector,
                coeff: c.coeff,
                velocity_unit: s.velocity_unit,
                total_coeff: (c.p_ref - s.total_pressure_pa) / c.q,
                static_coeff: (c.p_bar - s.static_pressure_pa) / c.q,
            });
        }
    }
    out.sort_by_key(|p| p.sector);
    Ok(out)
}

#[cfg(all(test, feature = "std"))]
mod tests {
    use super::*;
    use crate::gas::IdealGas;
    use crate::probe::layout::ProbeLayout;
    use crate::probe::{FlowCondition, ProbeModel, Regime, WakeTreatment, deg};
    use std::vec::Vec;

    fn vel(theta: f64, phi: f64) -> [f64; 3] {
        [
            -libm::cos(theta),
            -libm::sin(theta) * libm::cos(phi),
            -libm::sin(theta) * libm::sin(phi),
        ]
    }

    /// A noise-free calibration sweep from the incompressible sphere model:
    /// cone angle 0..=70 deg in 2 deg steps, about 2 deg apart along each
    /// ring of constant cone angle.
    fn sweep<const N: usize>(model: &ProbeModel<N>, q: f64, ps: f64) -> Vec<CalSample<N>> {
        let gas = IdealGas::DRY_AIR;
        let mut out = Vec::new();
        for i in 0..=35 {
            let theta = deg(2.0 * f64::from(i));
            // About 2 deg between neighbours along each ring.
            let steps = if i == 0 {
                1
            } else {
                (libm::ceil(180.0 * libm::sin(theta)) as u32).max(6)
            };
            for j in 0..steps {
                let phi = 2.0 * core::f64::consts::PI * f64::from(j) / f64::from(steps);
                let v = vel(theta, phi);
                let f = FlowCondition::from_dynamic_pressure(&gas, v, ps, q).unwrap();
                let p = model.port_pressures(Regime::Incompressible, &f).unwrap();
                out.push(CalSample {
                    velocity_unit: v,
                    total_pressure_pa: ps + q,
                    static_pressure_pa: ps,
                    pressures_pa: p,
                });
            }
        }
        out
    }

    fn check<const N: usize>(
        scheme: CalScheme,
        model: &ProbeModel<N>,
        max_theta_deg: f64,
    ) -> (f64, f64, f64) {
        // Calibrate at one condition...
        let table = build_table(scheme, &sweep(model, 400.0, 100_000.0)).unwrap();
        let t = CalTable::new(scheme, &table).unwrap();
        // ...and evaluate at off-grid angles at another q and p_s (the
        // coefficients are normalised, so the table carries over).
        let (q, ps) = (650.0, 85_000.0);
        let (mut worst_angle, mut worst_q, mut worst_ps) = (0.0f64, 0.0f64, 0.0f64);
        let mut seen = [false; 7];
        for i in 0..25 {
            for j in 0..17 {
                // Off-grid: odd fractions of the grid steps.
                let theta = deg(1.3 + (max_theta_deg - 2.6) * f64::from(i) / 24.0);
                let phi = deg(3.7 + 21.1 * f64::from(j));
                let v = vel(theta, phi);
                let f = FlowCondition::from_dynamic_pressure(&IdealGas::DRY_AIR, v, ps, q).unwrap();
                let p = model.port_pressures(Regime::Incompressible, &f).unwrap();
                let e = t.evaluate(&p).unwrap();
                seen[usize::from(e.sector)] = true;
                let tv = Vector3::new(v[0], v[1], v[2]);
                let ang = libm::atan2(e.velocity_unit.cross(&tv).norm(), e.velocity_unit.dot(&tv));
                worst_angle = worst_angle.max(ang.to_degrees());
                let q_est = e.total_pressure_pa - e.static_pressure_pa;
                worst_q = worst_q.max((q_est / q - 1.0).abs() * 100.0);
                worst_ps = worst_ps.max((e.static_pressure_pa - ps).abs() / q * 100.0);
            }
        }
        std::println!(
            "{scheme:?}: worst angle {worst_angle:.4} deg, q {worst_q:.4} %, p_s {worst_ps:.4} % of q"
        );
        // Every sector was exercised.
        assert!(seen.iter().take(N).all(|&s| s), "sectors {seen:?}");
        (worst_angle, worst_q, worst_ps)
    }

    #[test]
    fn seven_hole_table_recovers_off_grid_flows() {
        let layout = ProbeLayout::seven_port(deg(40.0), 1.0).unwrap();
        let model = ProbeModel::new(layout, IdealGas::DRY_AIR, WakeTreatment::Attached).unwrap();
        let (a, q, p) = check(CalScheme::SevenHoleGallington, &model, 64.0);
        // Interpolation error of a ~2 deg sweep with local quadratics.
        assert!(a < 0.02, "worst angle {a} deg");
        assert!(q < 0.03, "worst q {q} %");
        assert!(p < 0.03, "worst p_s {p} % of q");
    }

    #[test]
    fn five_hole_table_recovers_off_grid_flows() {
        let layout = ProbeLayout::five_port(deg(45.0), 1.0).unwrap();
        let model = ProbeModel::new(layout, IdealGas::DRY_AIR, WakeTreatment::Attached).unwrap();
        let (a, q, p) = check(CalScheme::FiveHoleTreasterYocum, &model, 60.0);
        assert!(a < 0.02, "worst angle {a} deg");
        assert!(q < 0.03, "worst q {q} %");
        assert!(p < 0.03, "worst p_s {p} % of q");
    }

    #[test]
    fn coefficient_forms() {
        // Head-on flow: ring ports equal, so every angle coefficient is 0
        // and the tip sector is chosen.
        let p = [100_500.0, 100_030.0, 100_030.0, 100_030.0, 100_030.0];
        let c = coefficients(CalScheme::FiveHoleTreasterYocum, &p).unwrap();
        assert_eq!(c.sector, 0);
        assert_eq!(c.coeff, [0.0, 0.0]);
        assert!((c.q - 470.0).abs() < 1e-9);
        // Port 2 highest on a 7-hole head: neighbours 1 and 3.
        let p = [
            100_100.0, 100_200.0, 100_400.0, 100_300.0, 99_900.0, 99_800.0, 99_850.0,
        ];
        let c = coefficients(CalScheme::SevenHoleGallington, &p).unwrap();
        assert_eq!(c.sector, 2);
        let q = 400.0 - 250.0;
        assert!((c.coeff[0] - 300.0 / q).abs() < 1e-12);
        assert!((c.coeff[1] - 100.0 / q).abs() < 1e-12);
    }

    #[test]
    fn errors_are_typed() {
        let table: [CalPoint; 0] = [];
        let t = CalTable::new(CalScheme::SevenHoleGallington, &table).unwrap();
        assert!(matches!(
            t.evaluate(&[1e5; 5]),
            Err(CalError::PortCount {
                got: 5,
                expected: 7
            })
        ));
        let mut p = [1e5; 7];
        p[0] = 1.001e5;
        assert!(matches!(
            t.evaluate(&p),
            Err(CalError::SparseSector { sector: 0, .. })
        ));
        p[3] = f64::NAN;
        assert_eq!(t.evaluate(&p), Err(CalError::BadPressure { port: 3 }));
        // Still air: no dynamic pressure.
        assert_eq!(
            t.evaluate(&[1e5; 7]),
            Err(CalError::NoDynamicPressure { sector: 0 })
        );
        let unsorted = [
            CalPoint {
                sector: 2,
                coeff: [0.0, 0.0],
                velocity_unit: [-1.0, 0.0, 0.0],
                total_coeff: 0.0,
                static_coeff: 0.0,
            },
            CalPoint {
                sector: 1,
                coeff: [0.0, 0.0],
                velocity_unit: [-1.0, 0.0, 0.0],
                total_coeff: 0.0,
                static_coeff: 0.0,
            },
        ];
        assert_eq!(
            CalTable::new(CalScheme::SevenHoleGallington, &unsorted),
            Err(CalError::BadPoint { index: 1 })
        );
        let s = [CalSample {
            velocity_unit: [1.0, 1.0, 0.0],
            total_pressure_pa: 1.0,
            static_pressure_pa: 1.0,
            pressures_pa: [1e5; 5],
        }];
        assert_eq!(
            build_table(CalScheme::FiveHoleTreasterYocum, &s),
            Err(CalError::BadSample { index: 0 })
        );
        assert!(matches!(
            build_table(CalScheme::SevenHoleGallington, &s),
            Err(CalError::PortCount { .. })
        ));
    }
}
