//! A small, portable digest for determinism checks.
//!
//! FNV-1a over 64 bits (Fowler, Noll and Vo; the parameters are those of the
//! published FNV-1a 64-bit variant). It is not a cryptographic hash: it is
//! there so that two runs can be compared bit for bit by one number.
//! Floats are hashed by their IEEE-754 bit pattern, so `-0.0` and `0.0`
//! differ and every NaN payload is visible.

/// FNV-1a 64-bit offset basis.
const OFFSET_BASIS: u64 = 0xcbf2_9ce4_8422_2325;
/// FNV-1a 64-bit prime.
const PRIME: u64 = 0x0000_0100_0000_01b3;

/// Running FNV-1a 64 digest.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Fnv64 {
    state: u64,
}

impl Default for Fnv64 {
    fn default() -> Self {
        Self::new()
    }
}

impl Fnv64 {
    /// A fresh digest.
    #[must_use]
    pub const fn new() -> Self {
        Self {
            state: OFFSET_BASIS,
        }
    }

    /// Feed raw bytes.
    pub fn bytes(&mut self, data: &[u8]) {
        for &b in data {
            self.state ^= u64::from(b);
            self.state = self.state.wrapping_mul(PRIME);
        }
    }

    /// Feed a `u64` as little-endian bytes.
    pub fn u64(&mut self, v: u64) {
        self.bytes(&v.to_le_bytes());
    }

    /// Feed an `f64` by its bit pattern.
    pub fn f64(&mut self, v: f64) {
        self.u64(v.to_bits());
    }

    /// Feed a slice of `f64` by their bit patterns.
    pub fn f64s(&mut self, vs: &[f64]) {
        for &v in vs {
            self.f64(v);
        }
    }

    /// The digest so far.
    #[must_use]
    pub const fn finish(&self) -> u64 {
        self.state
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Published FNV-1a 64 test vectors (the FNV reference test suite):
    /// "" -> 0xcbf29ce484222325, "a" -> 0xaf63dc4c8601ec8c,
    /// "foobar" -> 0x85944171f73967e8.
    #[test]
    fn published_vectors() {
        let mut d = Fnv64::new();
        assert_eq!(d.finish(), 0xcbf2_9ce4_8422_2325);
        d.bytes(b"a");
        assert_eq!(d.finish(), 0xaf63_dc4c_8601_ec8c);
        let mut d = Fnv64::new();
        d.bytes(b"foobar");
        assert_eq!(d.finish(), 0x8594_4171_f739_67e8);
    }

    #[test]
    fn signed_zero_differs() {
        let mut a = Fnv64::new();
        a.f64(0.0);
        let mut b = Fnv64::new();
        b.f64(-0.0);
        assert_ne!(a.finish(), b.finish());
    }
}
