//! Truth model of the multi-hole probe: what each port feels, written
//! independently of any estimator.
//!
//! For a port with unit normal `n` (probe frame) in a free stream of
//! velocity `v` relative to the probe (direction `v_hat`), the incidence
//! angle satisfies `cos theta = -n . v_hat`. Port pressure is
//! `p_static + dp(theta)` with
//! - subsonic (`M < 1`): `dp = (p0 - p) Cp(theta)`,
//!   `Cp = 1 - (9/4) sin^2 theta`, the potential-flow sphere (Anderson,
//!   *Fundamentals of Aerodynamics*, flow over a sphere); `p0 - p` from the
//!   isentropic relation (NACA 1135 eq. 44), which tends to `rho V^2 / 2`
//!   at low Mach;
//! - supersonic (`M >= 1`): the stagnation port reads the Rayleigh pitot
//!   pressure behind the bow shock (NACA 1135 eq. 100), and the surface
//!   follows modified Newtonian theory (Lees 1955),
//!   `Cp = Cp_max cos^2 theta` for `theta < 90 deg` and `Cp = 0` beyond,
//!   `Cp_max = (p02 - p) / q`, `q = gamma p M^2 / 2`.

use nav_core::gas::IdealGas;

use super::vec3::{self, V3};
use crate::record::ProbeLayoutSpec;

/// Port unit normals (probe frame) of a layout, per the shared convention:
/// port 0 at the tip `(1, 0, 0)`, the others on a cone of half-angle `c`
/// at azimuth `phi` from +y toward +z, `n = (cos c, sin c cos phi, sin c sin phi)`.
#[must_use]
pub fn port_normals(layout: &ProbeLayoutSpec) -> Vec<V3> {
    let cone = |c_deg: f64, k: u32| -> Vec<V3> {
        let c = c_deg.to_radians();
        let mut v = vec![[1.0, 0.0, 0.0]];
        for i in 0..k {
            let phi = 2.0 * core::f64::consts::PI * f64::from(i) / f64::from(k);
            v.push([
                libm::cos(c),
                libm::sin(c) * libm::cos(phi),
                libm::sin(c) * libm::sin(phi),
            ]);
        }
        v
    };
    match layout {
        ProbeLayoutSpec::FivePort { cone_angle_deg } => cone(*cone_angle_deg, 4),
        ProbeLayoutSpec::SevenPort { cone_angle_deg } => cone(*cone_angle_deg, 6),
        ProbeLayoutSpec::Custom { normals } => normals
            .iter()
            .map(|n| vec3::unit(*n).unwrap_or([1.0, 0.0, 0.0]))
            .collect(),
    }
}

/// Ideal port pressures, Pa (absolute), written into `out`.
///
/// `normals`: port normals in the frame of `v_rel`; `v_rel`: gas velocity
/// relative to the probe, same frame, m/s; `p_static_pa`,
/// `density_kg_per_m3`: free-stream static state. The speed of sound is
/// `sqrt(gamma p / rho)`, so that at low Mach `p0 - p` tends to exactly
/// `rho V^2 / 2` with the given density.
pub fn port_pressures(
    gas: &IdealGas,
    normals: &[V3],
    v_rel: V3,
    p_static_pa: f64,
    density_kg_per_m3: f64,
    out: &mut [f64],
) {
    let speed = vec3::norm(v_rel);
    let a = libm::sqrt(gas.gamma() * p_static_pa / density_kg_per_m3);
    let mach = speed / a;
    if speed.is_nan() || speed <= 1e-12 || !mach.is_finite() {
        for o in out.iter_mut() {
            *o = p_static_pa;
        }
        return;
    }
    let vh = vec3::scale(v_rel, 1.0 / speed);
    let g = gas.gamma();
    if mach < 1.0 {
        let dp0 =
            p_static_pa * (libm::pow(1.0 + 0.5 * (g - 1.0) * mach * mach, g / (g - 1.0)) - 1.0);
        for (o, n) in out.iter_mut().zip(normals) {
            let c = -vec3::dot(*n, vh);
            let s2 = (1.0 - c * c).max(0.0);
            *o = p_static_pa + dp0 * (1.0 - 2.25 * s2);
        }
    } else {
        let p02 = p_static_pa * gas.rayleigh_pitot_p02_over_p1(mach).unwrap_or(1.0);
        for (o, n) in out.iter_mut().zip(normals) {
            let c = -vec3::dot(*n, vh);
            *o = if c > 0.0 {
                p_static_pa + (p02 - p_static_pa) * c * c
            } else {
                p_static_pa
            };
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn layouts_follow_the_convention() {
        let n5 = port_normals(&ProbeLayoutSpec::FivePort {
            cone_angle_deg: 45.0,
        });
        assert_eq!(n5.len(), 5);
        let s = libm::sqrt(0.5);
        // Port 2 at phi = 90 deg: (cos 45, 0, sin 45).
        assert!(vec3::dist(n5[2], [s, 0.0, s]) < 1e-15);
        let n7 = port_normals(&ProbeLayoutSpec::SevenPort {
            cone_angle_deg: 40.0,
        });
        assert_eq!(n7.len(), 7);
        assert!((n7[1][1] - libm::sin(40f64.to_radians())).abs() < 1e-15);
    }

    #[test]
    fn sphere_law_and_newtonian() {
        let g = IdealGas::DRY_AIR;
        let normals = port_normals(&ProbeLayoutSpec::FivePort {
            cone_angle_deg: 45.0,
        });
        let mut out = [0.0; 5];
        // Low Mach head-on: tip sees q (Cp = 1), cone ports Cp = 1 - 9/4 * 1/2 = -1/8.
        let (p, t) = (1e5, 300.0);
        let v = 10.0;
        let rho = p / (g.r_j_per_kg_k() * t);
        port_pressures(&g, &normals, [-v, 0.0, 0.0], p, rho, &mut out);
        let q = 0.5 * rho * v * v;
        assert!((out[0] - p - q).abs() < 1e-3 * q);
        assert!((out[1] - p + 0.125 * q).abs() < 1e-3 * q);
        // Supersonic M = 2 head-on: tip reads the Rayleigh pitot value
        // 5.6404 p (NACA 1135 eq. 100, gamma 1.4); a 45 deg port reads
        // p + (p02 - p)/2.
        let a = libm::sqrt(1.4 * g.r_j_per_kg_k() * t);
        port_pressures(&g, &normals, [-2.0 * a, 0.0, 0.0], p, rho, &mut out);
        assert!((out[0] / p - 5.6404).abs() < 1e-4);
        assert!((out[1] - (p + 0.5 * (out[0] - p))).abs() < 1e-6 * p);
        // A port facing downstream (theta > 90 deg) reads static.
        port_pressures(&g, &normals, [2.0 * a, 0.0, 0.0], p, rho, &mut out);
        assert_eq!(out[0], p);
    }
}
