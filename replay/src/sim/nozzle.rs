//! Quasi-one-dimensional isentropic flow through a compressible conduit
//! fed by a reservoir: the area–Mach relation, choking at the throat, the
//! choked mass flux, and a normal shock in the diverging part where the back
//! pressure requires one. Every gas relation is `nav_core::gas` (NACA
//! Report 1135 equations); the nozzle logic is the textbook one (Anderson,
//! *Modern Compressible Flow*, chapter on quasi-one-dimensional flow:
//! subsonic, choked with a shock inside, shock at the exit plane, and
//! supersonic exit regimes).

use nav_core::gas::{GasError, IdealGas};
use nav_core::num::bracketed_root;

/// Why a compressible conduit is not usable.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum NozzleError {
    /// Fewer than two stations or a non-positive area.
    BadProfile,
    /// The area rises again after falling past the throat (or falls after
    /// rising): only one throat is modelled. `station_m` is where the shape
    /// turns the second time.
    SecondThroat {
        /// Station where the area turns a second time, m.
        station_m: f64,
    },
    /// A gas relation failed.
    Gas(GasError),
}

impl From<GasError> for NozzleError {
    fn from(e: GasError) -> Self {
        Self::Gas(e)
    }
}

impl core::fmt::Display for NozzleError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match self {
            Self::BadProfile => write!(f, "area profile needs two stations and positive areas"),
            Self::SecondThroat { station_m } => write!(
                f,
                "area turns a second time at station {station_m:.3} m: a compressible conduit must converge to one throat and then diverge"
            ),
            Self::Gas(e) => write!(f, "gas relation failed: {e:?}"),
        }
    }
}

impl std::error::Error for NozzleError {}

/// A normal shock inside the conduit.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Shock {
    /// Station of the shock, m.
    pub station_m: f64,
    /// Mach number just upstream.
    pub mach_upstream: f64,
    /// Stagnation pressure ratio across it, `p02/p01`.
    pub p0_ratio: f64,
}

/// The solved state of a compressible conduit.
#[derive(Debug, Clone, PartialEq)]
pub struct NozzleState {
    /// Mass flow, kg/s.
    pub mass_flow_kg_per_s: f64,
    /// Whether the throat is sonic.
    pub choked: bool,
    /// The normal shock, if one stands inside.
    pub shock: Option<Shock>,
    /// Mach number at each station.
    pub mach: Vec<f64>,
    /// Local stagnation pressure at each station (reservoir value before a
    /// shock, reduced after it), Pa.
    pub p0_pa: Vec<f64>,
    /// Reservoir stagnation temperature, K.
    pub t0_k: f64,
}

/// Area profile of a compressible conduit plus its precomputed critical
/// pressure ratios.
#[derive(Debug, Clone, PartialEq)]
pub struct Nozzle {
    /// Stations along the conduit, m (increasing).
    pub stations_m: Vec<f64>,
    /// Cross-section area at each station, m^2.
    pub area_m2: Vec<f64>,
    throat: usize,
    gas: IdealGas,
    t0_k: f64,
    /// `pb/p0` at which the throat first chokes with subsonic exit.
    pub first_critical_ratio: f64,
    /// `pb/p0` with a normal shock standing at the exit plane.
    pub exit_shock_ratio: f64,
    /// `pb/p0` of fully supersonic, shock-free isentropic exit flow.
    pub design_ratio: f64,
}

/// Flux function `psi(M) = sqrt(gamma) M (1 + (gamma-1)/2 M^2)^(-(gamma+1)/(2(gamma-1)))`,
/// so that `mdot = A p0 psi(M) / sqrt(R T0)` (NACA 1135 eqs. 43-45 combined).
fn psi(g: &IdealGas, mach: f64) -> f64 {
    let gm = g.gamma();
    let k = 0.5 * (gm - 1.0);
    libm::sqrt(gm) * mach * libm::pow(1.0 + k * mach * mach, -(gm + 1.0) / (2.0 * (gm - 1.0)))
}

impl Nozzle {
    /// A nozzle from stations and areas.
    ///
    /// # Errors
    /// [`NozzleError`] for a bad or multi-throat profile, or a failed gas
    /// relation.
    pub fn new(
        stations_m: Vec<f64>,
        area_m2: Vec<f64>,
        gas: IdealGas,
        t0_k: f64,
    ) -> Result<Self, NozzleError> {
        if stations_m.len() < 2
            || stations_m.len() != area_m2.len()
            || area_m2.iter().any(|a| !(a.is_finite() && *a > 0.0))
        {
            return Err(NozzleError::BadProfile);
        }
        let throat = area_m2
            .iter()
            .enumerate()
            .min_by(|a, b| a.1.total_cmp(b.1))
            .map_or(0, |(i, _)| i);
        let tol = 1e-12;
        for i in 1..=throat {
            if area_m2[i] > area_m2[i - 1] * (1.0 + tol) {
                return Err(NozzleError::SecondThroat {
                    station_m: stations_m[i - 1],
                });
            }
        }
        for i in throat + 1..area_m2.len() {
            if area_m2[i] < area_m2[i - 1] * (1.0 - tol) {
                return Err(NozzleError::SecondThroat {
                    station_m: stations_m[i - 1],
                });
            }
        }
        let a_t = area_m2[throat];
        let a_e = area_m2[area_m2.len() - 1];
        let ratio = a_e / a_t;
        let m_sub = gas.mach_from_area_ratio_subsonic(ratio)?;
        let first_critical_ratio = 1.0 / gas.p0_over_p(m_sub)?;
        let (exit_shock_ratio, design_ratio) = if ratio > 1.0 + 1e-12 {
            let m_sup = gas.mach_from_area_ratio_supersonic(ratio)?;
            let p_sup = 1.0 / gas.p0_over_p(m_sup)?;
            (p_sup * gas.normal_shock_p2_over_p1(m_sup)?, p_sup)
        } else {
            (first_critical_ratio, first_critical_ratio)
        };
        Ok(Self {
            stations_m,
            area_m2,
            throat,
            gas,
            t0_k,
            first_critical_ratio,
            exit_shock_ratio,
            design_ratio,
        })
    }

    /// Throat area, m^2.
    #[must_use]
    pub fn throat_area_m2(&self) -> f64 {
        self.area_m2[self.throat]
    }

    /// Station of the throat, m.
    #[must_use]
    pub fn throat_station_m(&self) -> f64 {
        self.stations_m[self.throat]
    }

    fn exit_area_m2(&self) -> f64 {
        self.area_m2[self.area_m2.len() - 1]
    }

    /// Choked mass flow for reservoir pressure `p0_pa`, kg/s.
    ///
    /// # Errors
    /// [`GasError`] from the gas relation.
    pub fn choked_mass_flow_kg_per_s(&self, p0_pa: f64) -> Result<f64, GasError> {
        self.gas
            .choked_mass_flow_kg_per_s(self.throat_area_m2(), p0_pa, self.t0_k)
    }

    /// Mass flow and `d mdot / d pb` for reservoir pressure `p0_pa` and back
    /// pressure `pb_pa`. Back pressures at or above `p0` give no flow (the
    /// linear extension below keeps a Newton iterate well defined there).
    ///
    /// # Errors
    /// [`GasError`] from a gas relation.
    pub fn flow(&self, p0_pa: f64, pb_pa: f64) -> Result<(f64, f64), GasError> {
        let ratio = pb_pa / p0_pa;
        if ratio <= self.first_critical_ratio {
            return Ok((self.choked_mass_flow_kg_per_s(p0_pa)?, 0.0));
        }
        // Subsonic everywhere. Near zero flow the flux behaves like
        // sqrt(p0 - pb) and its slope is unbounded: cap the ratio and extend
        // linearly beyond the cap.
        let cap = 1.0 - 1e-6;
        let r = ratio.min(cap);
        let g = self.gas;
        let m_e = g.mach_from_p0_over_p(1.0 / r)?;
        let gm = g.gamma();
        let k = 0.5 * (gm - 1.0);
        let sq = libm::sqrt(g.r_j_per_kg_k() * self.t0_k);
        let a_e = self.exit_area_m2();
        let mdot = a_e * p0_pa * psi(&g, m_e) / sq;
        let base = 1.0 + k * m_e * m_e;
        // dmdot/dM = A p0/sqrt(RT0) sqrt(gamma) (1 - M^2) base^(-e-1), e = (g+1)/(2(g-1));
        // dpb/dM = -p0 gamma M base^(-g/(g-1)-1).
        let e = (gm + 1.0) / (2.0 * (gm - 1.0));
        let dm_dmach =
            a_e * p0_pa / sq * libm::sqrt(gm) * (1.0 - m_e * m_e) * libm::pow(base, -e - 1.0);
        let dpb_dmach = -p0_pa * gm * m_e * libm::pow(base, -gm / (gm - 1.0) - 1.0);
        let slope = dm_dmach / dpb_dmach;
        if ratio > cap {
            let pb_cap = cap * p0_pa;
            return Ok((mdot + slope * (pb_pa - pb_cap), slope));
        }
        Ok((mdot, slope))
    }

    /// Full state for reservoir `p0_pa` and back pressure `pb_pa`.
    ///
    /// # Errors
    /// [`GasError`] from a gas relation or the shock search.
    pub fn solve(&self, p0_pa: f64, pb_pa: f64) -> Result<NozzleState, GasError> {
        let g = self.gas;
        let n = self.stations_m.len();
        let mut mach = vec![0.0; n];
        let mut p0 = vec![p0_pa; n];
        let ratio = (pb_pa / p0_pa).min(1.0);
        if ratio >= 1.0 {
            return Ok(NozzleState {
                mass_flow_kg_per_s: 0.0,
                choked: false,
                shock: None,
                mach,
                p0_pa: p0,
                t0_k: self.t0_k,
            });
        }
        let a_t = self.throat_area_m2();
        if ratio > self.first_critical_ratio {
            let m_e = g.mach_from_p0_over_p(1.0 / ratio)?;
            let a_star = self.exit_area_m2() / g.area_ratio(m_e.max(1e-9))?;
            for (m, a) in mach.iter_mut().zip(&self.area_m2) {
                *m = g.mach_from_area_ratio_subsonic((a / a_star).max(1.0))?;
            }
            let (mdot, _) = self.flow(p0_pa, pb_pa)?;
            return Ok(NozzleState {
                mass_flow_kg_per_s: mdot,
                choked: false,
                shock: None,
                mach,
                p0_pa: p0,
                t0_k: self.t0_k,
            });
        }
        // Choked: subsonic up to the throat, supersonic after it.
        for (i, (m, a)) in mach.iter_mut().zip(&self.area_m2).enumerate() {
            let ar = (a / a_t).max(1.0);
            *m = if i <= self.throat {
                g.mach_from_area_ratio_subsonic(ar)?
            } else {
                g.mach_from_area_ratio_supersonic(ar)?
            };
        }
        let mut shock = None;
        if ratio > self.exit_shock_ratio && self.exit_area_m2() > a_t * (1.0 + 1e-12) {
            // Exit pressure with the shock standing where the area is a_s.
            let pe_over_p0 = |a_s: f64| -> Result<f64, GasError> {
                let m1 = g.mach_from_area_ratio_supersonic((a_s / a_t).max(1.0))?;
                let r = g.normal_shock_p02_over_p01(m1)?;
                let a2_star = a_t / r;
                let me =
                    g.mach_from_area_ratio_subsonic((self.exit_area_m2() / a2_star).max(1.0))?;
                Ok(r / g.p0_over_p(me)?)
            };
            let root = bracketed_root(
                |a| pe_over_p0(a).map_or(f64::NAN, |v| v - ratio),
                a_t,
                self.exit_area_m2(),
                1e-13 * a_t,
                1e-14,
            )?;
            let a_s = root.x;
            // Station of that area downstream of the throat.
            let mut s_sh = self.stations_m[n - 1];
            for i in self.throat + 1..n {
                if self.area_m2[i] >= a_s {
                    let (a0, a1) = (self.area_m2[i - 1], self.area_m2[i]);
                    let f = if a1 > a0 { (a_s - a0) / (a1 - a0) } else { 0.0 };
                    s_sh =
                        self.stations_m[i - 1] + f * (self.stations_m[i] - self.stations_m[i - 1]);
                    break;
                }
            }
            let m1 = g.mach_from_area_ratio_supersonic((a_s / a_t).max(1.0))?;
            let r = g.normal_shock_p02_over_p01(m1)?;
            let a2_star = a_t / r;
            for i in self.throat + 1..n {
                if self.stations_m[i] >= s_sh {
                    mach[i] =
                        g.mach_from_area_ratio_subsonic((self.area_m2[i] / a2_star).max(1.0))?;
                    p0[i] = p0_pa * r;
                }
            }
            shock = Some(Shock {
                station_m: s_sh,
                mach_upstream: m1,
                p0_ratio: r,
            });
        }
        Ok(NozzleState {
            mass_flow_kg_per_s: self.choked_mass_flow_kg_per_s(p0_pa)?,
            choked: true,
            shock,
            mach,
            p0_pa: p0,
            t0_k: self.t0_k,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Converging–diverging: area 2 -> 1 -> 4 (m^2) over 0..1..3 m.
    fn cd() -> Nozzle {
        let st: Vec<f64> = (0..=300).map(|i| f64::from(i) * 0.01).collect();
        let ar: Vec<f64> = st
            .iter()
            .map(|&s| {
                if s <= 1.0 {
                    2.0 - s
                } else {
                    1.0 + 1.5 * (s - 1.0)
                }
            })
            .collect();
        Nozzle::new(st, ar, IdealGas::DRY_AIR, 300.0).unwrap()
    }

    #[test]
    fn regimes_and_mass_flow_continuity() {
        let nz = cd();
        let p0 = 2.0e5;
        // Subsonic: mass flow at every station agrees with the exit value.
        let st = nz.solve(p0, 0.99 * p0).unwrap();
        assert!(!st.choked && st.shock.is_none());
        let g = IdealGas::DRY_AIR;
        let sq = libm::sqrt(g.r_j_per_kg_k() * 300.0);
        for (m, a) in st.mach.iter().zip(&nz.area_m2) {
            let md = a * p0 * psi(&g, *m) / sq;
            assert!((md - st.mass_flow_kg_per_s).abs() < 1e-8 * md);
        }
        // Shock inside: choked, exit static pressure equals the back pressure.
        let pb = 0.5 * (nz.first_critical_ratio + nz.exit_shock_ratio) * p0;
        let st = nz.solve(p0, pb).unwrap();
        assert!(st.choked);
        let sh = st.shock.unwrap();
        assert!(sh.station_m > 1.0 && sh.station_m < 3.0);
        let me = *st.mach.last().unwrap();
        let pe = st.p0_pa.last().unwrap() / g.p0_over_p(me).unwrap();
        assert!((pe - pb).abs() < 1e-6 * pb, "{pe} vs {pb}");
        assert!(st.mach[150] > 1.0 || 1.5 > sh.station_m);
        // Below the exit-shock ratio: supersonic to the exit, no shock.
        let st = nz.solve(p0, 0.5 * nz.exit_shock_ratio * p0).unwrap();
        assert!(st.choked && st.shock.is_none());
        assert!(*st.mach.last().unwrap() > 2.0);
    }

    #[test]
    fn flow_derivative_matches_difference() {
        let nz = cd();
        let p0 = 1.5e5;
        for r in [0.995, 0.999, 0.9999] {
            let pb = r * p0;
            let (_, d) = nz.flow(p0, pb).unwrap();
            let h = 1e-3;
            let num = (nz.flow(p0, pb + h).unwrap().0 - nz.flow(p0, pb - h).unwrap().0) / (2.0 * h);
            assert!((d - num).abs() < 1e-4 * num.abs(), "{d} vs {num}");
        }
        // Choked: no dependence on the back pressure.
        assert_eq!(nz.flow(p0, 0.3 * p0).unwrap().1, 0.0);
    }

    #[test]
    fn second_throat_is_refused() {
        let st = vec![0.0, 1.0, 2.0, 3.0];
        let ar = vec![2.0, 1.0, 2.0, 1.5];
        assert!(matches!(
            Nozzle::new(st, ar, IdealGas::DRY_AIR, 300.0),
            Err(NozzleError::SecondThroat { .. })
        ));
    }
}
