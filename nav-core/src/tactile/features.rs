//! Throats (narrowing ahead) and openings (no wall in some directions).
//!
//! # Throat
//!
//! [`TactileMap::throat`] fits a section at each station given (ordered
//! any way), takes the clear diameter of every section with an estimate
//! ([`SectionEstimate::clear_diameter_m`]) and fits a weighted straight
//! line `D(x)` against the forward distance `x = -arc_m` (positive toward
//! the head). Each diameter's sigma is `2 sigma_r` with a floor of
//! [`ThroatSettings::diameter_sigma_floor_m`]. The conduit narrows ahead
//! when the slope is below `-min_narrowing_slope` *and* more than
//! `significance_sigmas` of its sigma below zero. The report always gives
//! the smallest estimated clear diameter and where it is.
//!
//! # Openings
//!
//! [`TactileMap::openings`] divides the section plane around the fitted
//! circle's centre into [`OPENING_SECTORS`] equal sectors (plane angle
//! from "left" toward "up", sector 0 starting at -pi) and counts, per
//! sector:
//! - `wall_here`: touched points in the station window no farther out than
//!   the circle plus a band;
//! - `free_beyond`: free-space probes in the window at or beyond the circle
//!   minus the band: the skin reached where wall should be and felt none;
//! - `wall_behind`, `wall_ahead`: touched points near the circle in the
//!   neighbouring axial windows (up to `neighbour_windows` window lengths
//!   beyond the station's window, behind = toward the tail).
//!
//! A sector is open when it has no `wall_here` and either a `free_beyond`
//! (the body pressed outward and found no wall) or wall on both sides
//! axially (previously seen wall missing here: a hole in the wall).
//! Neighbouring open sectors (circularly) merge into one candidate; its
//! direction is the map-frame unit vector of the run's middle angle, its
//! `clear_width_m` the chord of the open run on the circle and its
//! `bounded_width_m` the chord between the nearest wall hits flanking it
//! in the window (an upper estimate; `2 r` when there are none).

use super::section::{SectionEstimate, SectionSettings, SectionShape};
use super::{Station, TactileMap};
use crate::tactile::fit::count_f64;
use nalgebra::Vector3;

/// Angular sectors used by opening detection.
pub const OPENING_SECTORS: usize = 24;

/// Settings for [`TactileMap::throat`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ThroatSettings {
    /// Sections with an estimate needed for a trend (>= 2).
    pub min_sections: usize,
    /// Narrowing needs `dD/dx` below minus this (m of diameter per m).
    pub min_narrowing_slope: f64,
    /// And this many sigmas of the slope below zero.
    pub significance_sigmas: f64,
    /// Floor on each diameter's sigma, m.
    pub diameter_sigma_floor_m: f64,
}

impl Default for ThroatSettings {
    fn default() -> Self {
        Self {
            min_sections: 3,
            min_narrowing_slope: 0.05,
            significance_sigmas: 2.0,
            diameter_sigma_floor_m: 0.002,
        }
    }
}

/// Trend verdict.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ThroatStatus {
    /// Fewer sections with an estimate than `min_sections`, or all at one
    /// place.
    NotEnoughSections,
    /// Significant narrowing toward the head.
    Narrowing,
    /// Significant widening toward the head.
    Widening,
    /// No significant trend.
    Steady,
}

/// Throat detection result.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ThroatReport {
    /// Verdict.
    pub status: ThroatStatus,
    /// Stations examined.
    pub sections_examined: usize,
    /// Sections with a clear-diameter estimate.
    pub sections_estimated: usize,
    /// `dD/dx`, clear diameter change per metre toward the head (negative:
    /// narrowing ahead); 0 without a trend.
    pub slope: f64,
    /// 1-sigma of `slope`.
    pub slope_sigma: f64,
    /// Smallest estimated clear diameter, m.
    pub min_clear_diameter_m: Option<f64>,
    /// Arc length behind the head of that section, m.
    pub min_at_arc_m: Option<f64>,
    /// Map point of that station, m.
    pub min_at_map_m: Option<Vector3<f64>>,
}

/// Settings for [`TactileMap::openings`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct OpeningSettings {
    /// Radial band around the circle, m; at least 3 times the fit's RMS
    /// residual is used.
    pub band_m: f64,
    /// Neighbouring windows searched behind and ahead, in window lengths.
    pub neighbour_windows: f64,
    /// Touched points needed on each side for "wall missing here".
    pub min_wall_hits_beside: u16,
}

impl Default for OpeningSettings {
    fn default() -> Self {
        Self {
            band_m: 0.03,
            neighbour_windows: 2.0,
            min_wall_hits_beside: 1,
        }
    }
}

/// What made a candidate opening.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum OpeningEvidence {
    /// Free-space probes where wall was expected.
    PressedNoWall,
    /// Wall behind and ahead but none here.
    WallMissing,
    /// Both.
    Both,
}

/// A candidate opening (for branch detection).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct OpeningCandidate {
    /// Unit direction from the section centre toward the opening, map frame.
    pub direction_map: Vector3<f64>,
    /// Middle plane angle (from left toward up), rad.
    pub angle_rad: f64,
    /// Angular width of the open sectors, rad.
    pub angular_width_rad: f64,
    /// Chord of the open run on the section circle, m.
    pub clear_width_m: f64,
    /// Chord between the flanking wall hits, m (upper estimate).
    pub bounded_width_m: f64,
    /// Evidence kind.
    pub evidence: OpeningEvidence,
    /// Free-space probes in the run.
    pub free_probes: u16,
    /// Touched points in the neighbouring windows behind, in the run.
    pub wall_behind: u16,
    /// Touched points in the neighbouring windows ahead, in the run.
    pub wall_ahead: u16,
}

impl Default for OpeningCandidate {
    fn default() -> Self {
        Self {
            direction_map: Vector3::zeros(),
            angle_rad: 0.0,
            angular_width_rad: 0.0,
            clear_width_m: 0.0,
            bounded_width_m: 0.0,
            evidence: OpeningEvidence::PressedNoWall,
            free_probes: 0,
            wall_behind: 0,
            wall_ahead: 0,
        }
    }
}

/// Whether openings could be looked for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum OpeningStatus {
    /// The section has no circle to look around.
    NoReference,
    /// Looked; `count` candidates (possibly 0).
    Checked,
}

/// Up to `K` candidate openings around one section.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct OpeningReport<const K: usize> {
    /// Whether the search ran.
    pub status: OpeningStatus,
    /// Candidates; the first `count` are valid.
    pub candidates: [OpeningCandidate; K],
    /// Valid candidates.
    pub count: usize,
    /// Candidates found beyond the capacity `K`.
    pub dropped: usize,
}

impl<const K: usize> OpeningReport<K> {
    /// The valid candidates.
    #[must_use]
    pub fn candidates(&self) -> &[OpeningCandidate] {
        self.candidates.get(..self.count).unwrap_or(&[])
    }
}

#[derive(Debug, Clone, Copy, Default)]
struct SectorTally {
    wall_here: u16,
    free_beyond: u16,
    wall_behind: u16,
    wall_ahead: u16,
    min_angle: f64,
    max_angle: f64,
}

/// Sector of a plane angle in `[-pi, pi]`.
fn sector_of(angle_rad: f64) -> usize {
    let w = core::f64::consts::TAU / count_f64(OPENING_SECTORS);
    let from_start = angle_rad + core::f64::consts::PI;
    let mut k = 0;
    while k + 1 < OPENING_SECTORS && from_start >= count_f64(k + 1) * w {
        k += 1;
    }
    k
}

fn sector_mid_angle(k: usize) -> f64 {
    let w = core::f64::consts::TAU / count_f64(OPENING_SECTORS);
    -core::f64::consts::PI + (count_f64(k) + 0.5) * w
}

fn chord(radius_m: f64, angle_rad: f64) -> f64 {
    if angle_rad >= core::f64::consts::PI {
        2.0 * radius_m
    } else {
        2.0 * radius_m * libm::sin(0.5 * angle_rad.max(0.0))
    }
}

impl<const W: usize> TactileMap<W> {
    /// Throat detection over sections at `stations` (module docs).
    #[must_use]
    pub fn throat(
        &self,
        stations: &[Station],
        section: &SectionSettings,
        settings: &ThroatSettings,
    ) -> ThroatReport {
        let mut report = ThroatReport {
            status: ThroatStatus::NotEnoughSections,
            sections_examined: stations.len(),
            sections_estimated: 0,
            slope: 0.0,
            slope_sigma: 0.0,
            min_clear_diameter_m: None,
            min_at_arc_m: None,
            min_at_map_m: None,
        };
        // Weighted sums for the line D = a + b x.
        let (mut sw, mut swx, mut swy, mut swxx, mut swxy) = (0.0, 0.0, 0.0, 0.0, 0.0);
        for st in stations {
            let est = self.section_at(st, section);
            let Some(d) = est.clear_diameter_m() else {
                continue;
            };
            let sigma_r = match est.plane.shape {
                SectionShape::Circle(c) => c.radius_sigma_m,
                _ => 0.0,
            };
            let sigma = (2.0 * sigma_r).max(settings.diameter_sigma_floor_m);
            let w = 1.0 / (sigma * sigma);
            let x = -st.arc_m;
            sw += w;
            swx += w * x;
            swy += w * d;
            swxx += w * x * x;
            swxy += w * x * d;
            report.sections_estimated += 1;
            if report.min_clear_diameter_m.is_none_or(|m| d < m) {
                report.min_clear_diameter_m = Some(d);
                report.min_at_arc_m = Some(st.arc_m);
                report.min_at_map_m = Some(st.point_map_m);
            }
        }
        let det = sw * swxx - swx * swx;
        if report.sections_estimated < settings.min_sections.max(2)
            || !crate::tactile::fit::positive(det)
        {
            return report;
        }
        let slope = (sw * swxy - swx * swy) / det;
        let slope_sigma = libm::sqrt(sw / det);
        report.slope = slope;
        report.slope_sigma = slope_sigma;
        let k = settings.significance_sigmas;
        report.status = if slope < -settings.min_narrowing_slope && slope + k * slope_sigma < 0.0 {
            ThroatStatus::Narrowing
        } else if slope > settings.min_narrowing_slope && slope - k * slope_sigma > 0.0 {
            ThroatStatus::Widening
        } else {
            ThroatStatus::Steady
        };
        report
    }

    /// Candidate openings around `section` (module docs). `section` should
    /// come from [`TactileMap::section_at`] on this map with `settings`.
    #[must_use]
    pub fn openings<const K: usize>(
        &self,
        section: &SectionEstimate,
        settings: &SectionSettings,
        opening: &OpeningSettings,
    ) -> OpeningReport<K> {
        let mut report = OpeningReport {
            status: OpeningStatus::NoReference,
            candidates: [OpeningCandidate::default(); K],
            count: 0,
            dropped: 0,
        };
        let SectionShape::Circle(circle) = section.plane.shape else {
            return report;
        };
        report.status = OpeningStatus::Checked;
        let r = circle.radius_m;
        let band = opening.band_m.max(3.0 * circle.rms_residual_m);
        let hw = settings.half_window_m;
        let reach = hw * (1.0 + opening.neighbour_windows.max(0.0));
        let axis = section.axis_map.into_inner();
        let [cx, cy] = circle.centre_plane_m;
        let mut tally = [SectorTally {
            min_angle: f64::INFINITY,
            max_angle: f64::NEG_INFINITY,
            ..SectorTally::default()
        }; OPENING_SECTORS];
        for p in self.points() {
            if !self.usable(p, &section.station, settings) {
                continue;
            }
            let d = p.point_map_m - section.station.point_map_m;
            let axial = d.dot(&axis);
            if libm::fabs(axial) > reach {
                continue;
            }
            let u = d.dot(&section.left_map) - cx;
            let v = d.dot(&section.up_map) - cy;
            let rho = libm::sqrt(u * u + v * v);
            let angle = libm::atan2(v, u);
            let Some(t) = tally.get_mut(sector_of(angle)) else {
                continue;
            };
            let here = libm::fabs(axial) <= hw;
            if here {
                if p.touched && rho <= r + band {
                    t.wall_here = t.wall_here.saturating_add(1);
                    t.min_angle = t.min_angle.min(angle);
                    t.max_angle = t.max_angle.max(angle);
                } else if !p.touched && rho >= r - band {
                    t.free_beyond = t.free_beyond.saturating_add(1);
                }
            } else if p.touched && libm::fabs(rho - r) <= band.max(0.25 * r) {
                if axial < 0.0 {
                    t.wall_behind = t.wall_behind.saturating_add(1);
                } else {
                    t.wall_ahead = t.wall_ahead.saturating_add(1);
                }
            }
        }
        let need = opening.min_wall_hits_beside.max(1);
        let mut open = [false; OPENING_SECTORS];
        for (o, t) in open.iter_mut().zip(tally.iter()) {
            *o = t.wall_here == 0
                && (t.free_beyond > 0 || (t.wall_behind >= need && t.wall_ahead >= need));
        }
        if open.iter().all(|o| *o) || !open.iter().any(|o| *o) {
            // All open: no wall to open from; none open: nothing to report.
            return report;
        }
        // Start scanning just after a closed sector so runs do not wrap.
        let start = open.iter().position(|o| !*o).unwrap_or(0);
        let sector_w = core::f64::consts::TAU / count_f64(OPENING_SECTORS);
        let mut i = 0;
        while i < OPENING_SECTORS {
            let k = (start + i) % OPENING_SECTORS;
            if !open.get(k).copied().unwrap_or(false) {
                i += 1;
                continue;
            }
            // A run of open sectors from k.
            let mut len = 0;
            let (mut free, mut behind, mut ahead) = (0u16, 0u16, 0u16);
            let mut gap_evidence = false;
            let mut free_evidence = false;
            while i + len < OPENING_SECTORS {
                let kk = (start + i + len) % OPENING_SECTORS;
                let Some(true) = open.get(kk).copied() else {
                    break;
                };
                if let Some(t) = tally.get(kk) {
                    free = free.saturating_add(t.free_beyond);
                    behind = behind.saturating_add(t.wall_behind);
                    ahead = ahead.saturating_add(t.wall_ahead);
                    free_evidence |= t.free_beyond > 0;
                    gap_evidence |= t.wall_behind >= need && t.wall_ahead >= need;
                }
                len += 1;
            }
            let first = k;
            let last = (start + i + len - 1) % OPENING_SECTORS;
            let span = sector_w * count_f64(len);
            let mid = sector_mid_angle(first) + 0.5 * (span - sector_w);
            // Flanking wall hits: the nearest sectors with wall_here on
            // either side, searched outward.
            let mut lo_angle = None;
            let mut hi_angle = None;
            for step in 1..OPENING_SECTORS {
                let before = (first + OPENING_SECTORS - step) % OPENING_SECTORS;
                if let Some(t) = tally.get(before).filter(|t| t.wall_here > 0) {
                    lo_angle = Some(t.max_angle);
                    break;
                }
            }
            for step in 1..OPENING_SECTORS {
                let after = (last + step) % OPENING_SECTORS;
                if let Some(t) = tally.get(after).filter(|t| t.wall_here > 0) {
                    hi_angle = Some(t.min_angle);
                    break;
                }
            }
            let bounded = match (lo_angle, hi_angle) {
                (Some(a), Some(b)) => {
                    let mut gap = b - a;
                    if gap <= 0.0 {
                        gap += core::f64::consts::TAU;
                    }
                    chord(r, gap)
                }
                _ => 2.0 * r,
            };
            let cand = OpeningCandidate {
                direction_map: section.direction_map(mid),
                angle_rad: libm::atan2(libm::sin(mid), libm::cos(mid)),
                angular_width_rad: span,
                clear_width_m: chord(r, span),
                bounded_width_m: bounded.max(chord(r, span)),
                evidence: match (free_evidence, gap_evidence) {
                    (true, true) => OpeningEvidence::Both,
                    (false, true) => OpeningEvidence::WallMissing,
                    _ => OpeningEvidence::PressedNoWall,
                },
                free_probes: free,
                wall_behind: behind,
                wall_ahead: ahead,
            };
            if let Some(slot) = report.candidates.get_mut(report.count) {
                *slot = cand;
                report.count += 1;
            } else {
                report.dropped += 1;
            }
            i += len;
        }
        report
    }
}
