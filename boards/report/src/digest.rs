//! FNV-1a (64-bit) over every byte a report writes, so two runs compare by one number.
//!
//! FNV-1a is chosen because it is a few lines of integer code that runs the same on every core;
//! it is a fingerprint for equality, not a cryptographic hash.

use core::fmt;

/// FNV-1a 64-bit offset basis (FNV reference, Fowler/Noll/Vo).
const OFFSET_BASIS: u64 = 0xcbf2_9ce4_8422_2325;
/// FNV-1a 64-bit prime, 2^40 + 2^8 + 0xb3 (FNV reference, Fowler/Noll/Vo).
const PRIME: u64 = 0x0000_0100_0000_01b3;

/// Running FNV-1a 64-bit state.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Fnv1a64 {
    state: u64,
}

impl Default for Fnv1a64 {
    fn default() -> Self {
        Self::new()
    }
}

impl Fnv1a64 {
    /// A digest of no bytes yet.
    pub const fn new() -> Self {
        Self {
            state: OFFSET_BASIS,
        }
    }

    /// Folds `bytes` into the digest in order.
    pub fn update(&mut self, bytes: &[u8]) {
        for &byte in bytes {
            self.state ^= u64::from(byte);
            self.state = self.state.wrapping_mul(PRIME);
        }
    }

    /// Folds the little-endian bytes of `value`, so numbers that are not printed still count.
    pub fn update_u64(&mut self, value: u64) {
        self.update(&value.to_le_bytes());
    }

    /// The digest of everything folded so far.
    pub const fn value(&self) -> u64 {
        self.state
    }
}

/// A `fmt::Write` that digests every byte it passes on, so the digest covers exactly what was printed.
pub struct DigestWriter<'a, W: fmt::Write> {
    inner: &'a mut W,
    digest: Fnv1a64,
}

impl<'a, W: fmt::Write> DigestWriter<'a, W> {
    /// Wraps `inner`; nothing is digested yet.
    pub fn new(inner: &'a mut W) -> Self {
        Self {
            inner,
            digest: Fnv1a64::new(),
        }
    }

    /// The digest of all bytes written so far.
    pub fn digest(&self) -> u64 {
        self.digest.value()
    }
}

impl<W: fmt::Write> fmt::Write for DigestWriter<'_, W> {
    fn write_str(&mut self, s: &str) -> fmt::Result {
        self.digest.update(s.as_bytes());
        self.inner.write_str(s)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use core::fmt::Write;

    fn fnv(bytes: &[u8]) -> u64 {
        let mut d = Fnv1a64::new();
        d.update(bytes);
        d.value()
    }

    // Test vectors of the FNV reference test suite (Fowler/Noll/Vo, FNV-1a 64-bit), from memory;
    // also recomputed with a separate Python implementation when this test was written.
    #[test]
    fn reference_vectors() {
        assert_eq!(fnv(b""), 0xcbf2_9ce4_8422_2325);
        assert_eq!(fnv(b"a"), 0xaf63_dc4c_8601_ec8c);
        assert_eq!(fnv(b"foobar"), 0x8594_4171_f739_67e8);
    }

    #[test]
    fn split_writes_digest_like_one_write() {
        struct Sink;
        impl fmt::Write for Sink {
            fn write_str(&mut self, _: &str) -> fmt::Result {
                Ok(())
            }
        }
        let mut sink = Sink;
        let mut w = DigestWriter::new(&mut sink);
        w.write_str("foo").unwrap();
        w.write_str("bar").unwrap();
        assert_eq!(w.digest(), fnv(b"foobar"));
    }

    #[test]
    fn order_matters() {
        assert_ne!(fnv(b"ab"), fnv(b"ba"));
        let mut d = Fnv1a64::new();
        d.update_u64(1);
        assert_ne!(d.value(), Fnv1a64::new().value());
    }
}
