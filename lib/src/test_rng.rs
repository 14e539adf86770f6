//! The unit tests' pseudo-random numbers: Marsaglia's xorshift64 (shifts 13, 7, 17), one seed per
//! test, so every run draws the same cases.

/// The generator from `seed` (not 0); each call returns the next state.
pub(crate) fn xorshift(mut seed: u64) -> impl FnMut() -> u64 {
    move || {
        seed ^= seed << 13;
        seed ^= seed >> 7;
        seed ^= seed << 17;
        seed
    }
}
