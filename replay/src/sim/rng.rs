//! Seeded noise for the simulator: ChaCha8 streams with normals from our own
//! Box–Muller transform (Box and Muller, "A note on the generation of random
//! normal deviates", Ann. Math. Statist. 29, 1958), all maths through `libm`.
//!
//! Every noise source gets its own ChaCha stream (same seed, different
//! stream number), so switching one channel on or off never shifts the
//! numbers another channel draws.

use rand_chacha::ChaCha8Rng;
use rand_core::{RngCore, SeedableRng};

/// Stream numbers, one per noise source.
pub(crate) mod stream {
    pub const PROBE: u64 = 1;
    pub const CONTACT: u64 = 2;
    pub const ODOMETRY: u64 = 3;
    pub const JOINTS: u64 = 4;
    pub const TEMPERATURE: u64 = 5;
    pub const DROPOUT: u64 = 6;
    pub const BIAS: u64 = 7;
}

/// A seeded normal generator.
#[derive(Debug, Clone)]
pub struct NormalRng {
    rng: ChaCha8Rng,
    spare: Option<f64>,
}

impl NormalRng {
    /// Stream `stream` of seed `seed`.
    #[must_use]
    pub fn new(seed: u64, stream: u64) -> Self {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        rng.set_stream(stream);
        Self { rng, spare: None }
    }

    /// Uniform in the open interval (0, 1), 53 random bits.
    pub fn uniform(&mut self) -> f64 {
        loop {
            let bits = self.rng.next_u64() >> 11;
            if bits != 0 {
                // 2^-53: exact, bits < 2^53.
                #[allow(clippy::cast_precision_loss)]
                return (bits as f64) * (1.0 / 9_007_199_254_740_992.0);
            }
        }
    }

    /// Standard normal deviate (Box–Muller, both values used).
    pub fn normal(&mut self) -> f64 {
        if let Some(z) = self.spare.take() {
            return z;
        }
        let u1 = self.uniform();
        let u2 = self.uniform();
        let r = libm::sqrt(-2.0 * libm::log(u1));
        let a = 2.0 * core::f64::consts::PI * u2;
        self.spare = Some(r * libm::sin(a));
        r * libm::cos(a)
    }

    /// Normal with standard deviation `sigma` (zero when `sigma` is zero,
    /// without drawing).
    pub fn gauss(&mut self, sigma: f64) -> f64 {
        if sigma == 0.0 {
            0.0
        } else {
            sigma * self.normal()
        }
    }

    /// True with probability `p` (no draw when `p` is zero).
    pub fn chance(&mut self, p: f64) -> bool {
        p > 0.0 && self.uniform() < p
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn moments_of_normals() {
        let mut g = NormalRng::new(42, 1);
        let n = 200_000;
        let (mut s, mut s2) = (0.0, 0.0);
        for _ in 0..n {
            let z = g.normal();
            s += z;
            s2 += z * z;
        }
        let mean = s / f64::from(n);
        let var = s2 / f64::from(n) - mean * mean;
        // Standard error of the mean is 1/sqrt(n) = 0.0022; of the variance sqrt(2/n) = 0.0032.
        assert!(mean.abs() < 0.011, "mean {mean}");
        assert!((var - 1.0).abs() < 0.016, "var {var}");
    }

    #[test]
    fn streams_differ_and_repeat() {
        let mut a = NormalRng::new(7, 1);
        let mut b = NormalRng::new(7, 2);
        let mut c = NormalRng::new(7, 1);
        let xa: Vec<f64> = (0..8).map(|_| a.normal()).collect();
        let xb: Vec<f64> = (0..8).map(|_| b.normal()).collect();
        let xc: Vec<f64> = (0..8).map(|_| c.normal()).collect();
        assert_ne!(xa, xb);
        assert_eq!(xa, xc);
    }
}
