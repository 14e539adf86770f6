//! The unit tests' pseudo-random numbers: Marsaglia's xorshift64 (shifts 13, 7, 17), one seed per
//! test, so every run draws the same cases.

/// The generator from `seed` (not 0); each call returns the next state.
pub(crate) fn xorshift(mut seed: u64) -> impl FnMut() -> u64 {
    move || step64(&mut seed)
}

/// One xorshift64 step of the state `x` (not 0), in place; returns the new state.
pub(crate) fn step64(x: &mut u64) -> u64 {
    *x ^= *x << 13;
    *x ^= *x >> 7;
    *x ^= *x << 17;
    *x
}

/// One step of Marsaglia's xorshift32 (shifts 13, 17, 5) of the state `x` (not 0), in place;
/// returns the new state: tests that draw 32-bit words.
pub(crate) fn step32(x: &mut u32) -> u32 {
    *x ^= *x << 13;
    *x ^= *x >> 17;
    *x ^= *x << 5;
    *x
}
