//! Generated worlds: scenario files drawn at random, in families, from a
//! seed.
//!
//! A family is a kind of conduit world with the ranges its quantities are
//! drawn from ([`Family`], documented with the physical reason for each
//! range in `replay/SCENARIOS.md`, "Generated worlds"). [`generate`] turns a
//! family, a seed and optional fixed parameters into a scenario file and
//! the validated [`Scenario`] it loads to, and builds the simulation once to
//! prove the world is usable (the flow solves, the robot fits where it
//! starts, the family's defining feature is really there: a choked throat
//! and a shock for `hot`, a branch narrower than the body for
//! `narrow-strongest` and `pinch`). A draw that fails those checks is
//! redrawn from the next attempt stream, at most [`MAX_ATTEMPTS`] times.
//!
//! Rules (checked by `tests/tests/worlds.rs`):
//! - the same family, seed and parameters give the same file, byte for
//!   byte (`same_seed_same_world`);
//! - every generated world passes the scenario validation and builds a
//!   simulation (`every_family_generates_valid_worlds`);
//! - the saved file loads back to the identical scenario
//!   (`saved_worlds_load_back_identical`);
//! - each family has its defining feature (`families_have_their_features`).
//!
//! Worlds are named `<family>-<seed>` and every node and conduit has an
//! invented, generic id (`portal`, `fork`, `branch-b`, ...).

pub mod draft;
mod families;
pub mod shape;

use std::collections::BTreeMap;

use super::Sim;
use super::rng::NormalRng;
use super::scenario::Scenario;
pub use families::{COMMON_KEYS, Family};

/// Attempts (each from its own random stream) before a family and seed are
/// given up as impossible.
pub const MAX_ATTEMPTS: u64 = 24;

/// Why no world could be generated.
#[derive(Debug, Clone, PartialEq)]
pub enum WorldGenError {
    /// No family of that name.
    UnknownFamily(String),
    /// A parameter the family does not draw, or a malformed one.
    BadParameter {
        /// The family.
        family: &'static str,
        /// What is wrong.
        reason: String,
    },
    /// Every attempt drew a world that failed its checks.
    NoValidWorld {
        /// The family.
        family: &'static str,
        /// The seed.
        seed: u64,
        /// Why the last attempt failed.
        last_reason: String,
    },
}

impl core::fmt::Display for WorldGenError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match self {
            Self::UnknownFamily(n) => write!(
                f,
                "no world family {n:?}; families: {}",
                Family::ALL.map(Family::name).join(", ")
            ),
            Self::BadParameter { family, reason } => write!(f, "family {family}: {reason}"),
            Self::NoValidWorld {
                family,
                seed,
                last_reason,
            } => write!(
                f,
                "family {family} seed {seed}: no valid world in {MAX_ATTEMPTS} attempts (last: {last_reason})"
            ),
        }
    }
}

impl std::error::Error for WorldGenError {}

/// A world request: family, seed and fixed parameters, as written
/// `world:FAMILY` or `world:FAMILY,key=value,...` wherever a scenario is
/// accepted.
#[derive(Debug, Clone, PartialEq)]
pub struct WorldSpec {
    /// The family.
    pub family: Family,
    /// Parameters fixed instead of drawn.
    pub fixed: BTreeMap<String, f64>,
}

impl WorldSpec {
    /// Parse `FAMILY[,key=value...]` (without the `world:` prefix).
    ///
    /// # Errors
    /// An unknown family, or a parameter that is not `key=number` with a
    /// key the family draws.
    pub fn parse(text: &str) -> Result<Self, WorldGenError> {
        let mut parts = text.split(',');
        let name = parts.next().unwrap_or("").trim();
        let family =
            Family::from_name(name).ok_or_else(|| WorldGenError::UnknownFamily(name.into()))?;
        let mut fixed = BTreeMap::new();
        for p in parts {
            let (k, v) = p
                .split_once('=')
                .ok_or_else(|| WorldGenError::BadParameter {
                    family: family.name(),
                    reason: format!("parameter {p:?}: expected key=value"),
                })?;
            let x: f64 = v
                .trim()
                .parse()
                .ok()
                .filter(|x: &f64| x.is_finite())
                .ok_or_else(|| WorldGenError::BadParameter {
                    family: family.name(),
                    reason: format!("parameter {k}: {v:?} is not a finite number"),
                })?;
            fixed.insert(k.trim().to_string(), x);
        }
        family.check_keys(&fixed)?;
        Ok(Self { family, fixed })
    }

    /// The text form, `FAMILY[,key=value...]`.
    #[must_use]
    pub fn text(&self) -> String {
        let mut s = self.family.name().to_string();
        for (k, v) in &self.fixed {
            s.push_str(&format!(",{k}={v}"));
        }
        s
    }
}

/// A generated world.
#[derive(Debug, Clone, PartialEq)]
pub struct GeneratedWorld {
    /// Its family.
    pub family: Family,
    /// Its seed (also the seed of every noise stream in it).
    pub seed: u64,
    /// Every drawn (or fixed) parameter, by name.
    pub parameters: BTreeMap<String, f64>,
    /// The scenario file.
    pub toml: String,
    /// The scenario it loads to.
    pub scenario: Scenario,
}

impl GeneratedWorld {
    /// The parameters as `key=value` text, in name order.
    #[must_use]
    pub fn parameter_text(&self) -> String {
        param_text(&self.parameters)
    }
}

/// Parameters as `key=value` text, in name order.
fn param_text(p: &BTreeMap<String, f64>) -> String {
    p.iter()
        .map(|(k, v)| format!("{k}={}", fmt_param(*v)))
        .collect::<Vec<_>>()
        .join(" ")
}

/// A parameter for reading: whole numbers without a fraction, others to 4
/// significant digits.
fn fmt_param(v: f64) -> String {
    if v.fract() == 0.0 && v.abs() < 1e9 {
        format!("{v:.0}")
    } else {
        format!("{v:.4}")
    }
}

/// The random draws of one attempt, with the record of what was drawn.
#[derive(Debug)]
pub(crate) struct Draw<'a> {
    rng: NormalRng,
    fixed: &'a BTreeMap<String, f64>,
    drawn: BTreeMap<String, f64>,
}

/// Stream numbers of the world draws (the noise streams use 1 to 7).
const WORLD_STREAM_BASE: u64 = 1000;

impl<'a> Draw<'a> {
    fn new(seed: u64, family: Family, attempt: u64, fixed: &'a BTreeMap<String, f64>) -> Self {
        Self {
            rng: NormalRng::new(seed, WORLD_STREAM_BASE + 100 * family.index() + attempt),
            fixed,
            drawn: BTreeMap::new(),
        }
    }

    /// A named parameter: uniform in `[lo, hi]` unless fixed. The draw is
    /// made either way, so fixing one parameter does not change the others.
    pub(crate) fn param(&mut self, key: &str, lo: f64, hi: f64) -> f64 {
        let x = lo + (hi - lo) * self.rng.uniform();
        let v = self.fixed.get(key).copied().unwrap_or(x);
        self.drawn.insert(key.to_string(), v);
        v
    }

    /// A named whole-number parameter in `lo..=hi` unless fixed.
    pub(crate) fn count(&mut self, key: &str, lo: u32, hi: u32) -> u32 {
        let span = f64::from(hi - lo + 1);
        let x = libm::floor(self.rng.uniform() * span).min(span - 1.0);
        let drawn = f64::from(lo) + x;
        let v = self.fixed.get(key).copied().map_or(drawn, libm::round);
        self.drawn.insert(key.to_string(), v);
        #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
        let n = v.max(0.0) as u32;
        n
    }

    /// An unnamed draw in `[lo, hi]` (geometry detail).
    pub(crate) fn uniform(&mut self, lo: f64, hi: f64) -> f64 {
        lo + (hi - lo) * self.rng.uniform()
    }

    /// An unnamed index in `0..n` (`n > 0`).
    pub(crate) fn index(&mut self, n: usize) -> usize {
        #[allow(clippy::cast_precision_loss)]
        let x = libm::floor(self.rng.uniform() * n as f64);
        #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
        let i = x as usize;
        i.min(n.saturating_sub(1))
    }

    /// A fair coin.
    pub(crate) fn coin(&mut self) -> bool {
        self.rng.uniform() < 0.5
    }
}

/// Generate a world of `spec` from `seed`, and the simulation built from
/// it (the proof that it is usable; a caller that runs it need not build it
/// again).
///
/// # Errors
/// [`WorldGenError::NoValidWorld`] when no attempt passes its checks (the
/// last reason is kept).
pub fn generate(spec: &WorldSpec, seed: u64) -> Result<(GeneratedWorld, Sim), WorldGenError> {
    let mut last_reason = String::new();
    for attempt in 0..MAX_ATTEMPTS {
        let mut draw = Draw::new(seed, spec.family, attempt, &spec.fixed);
        let mut draft = match spec.family.draft(&mut draw, seed) {
            Ok(d) => d,
            Err(why) => {
                last_reason = why;
                continue;
            }
        };
        if let Some((a, b)) = shape::first_overlap(&draft) {
            last_reason = format!(
                "conduits {} and {} come too close",
                draft.conduits[a].id, draft.conduits[b].id
            );
            continue;
        }
        draft.comments = vec![
            format!(
                "Generated world: family {}, seed {seed} (attempt {attempt}).",
                spec.family.name()
            ),
            format!("Regenerate: replay world {} --seed {seed}", spec.text()),
            format!("Drawn: {}", param_text(&draw.drawn)),
            "Invented for testing; not a real place.".into(),
        ];
        let toml = draft.to_toml();
        let scenario = match Scenario::from_toml_str(&toml) {
            Ok(s) => s,
            Err(e) => {
                last_reason = format!("refused: {e}");
                continue;
            }
        };
        let sim = match Sim::new(scenario.clone()) {
            Ok(s) => s,
            Err(e) => {
                last_reason = format!("not simulable: {e}");
                continue;
            }
        };
        if let Err(why) = spec.family.check_features(&sim) {
            last_reason = why;
            continue;
        }
        let world = GeneratedWorld {
            family: spec.family,
            seed,
            parameters: draw.drawn,
            toml,
            scenario,
        };
        return Ok((world, sim));
    }
    Err(WorldGenError::NoValidWorld {
        family: spec.family.name(),
        seed,
        last_reason,
    })
}
