//! Every public function of `glowcheck::fixed`.

use glowcheck::fixed;

use crate::probe::{keep_i, opaque};

static WIDE: [u128; 3] = [1 << 100, 12_345, 7];
static WIDE_SIGNED: [i128; 3] = [-(1 << 90), 54_321, -3];

/// Calls each function on opaque inputs.
// Kept out of line so each module's locals get their own stack frame, not one summed frame in main.
#[inline(never)]
pub fn run() {
    let [a, b, c] = opaque(&WIDE);
    let [sa, sb, sc] = opaque(&WIDE_SIGNED);
    keep_i(fixed::mul_div_u128(a, b, c).unwrap_or(0) as i128);
    keep_i(fixed::mul_div_i128(sa, sb, sc).unwrap_or(0));
    keep_i(fixed::isqrt_u128(a) as i128);
    keep_i(fixed::div_round_u128(a, c).unwrap_or(0) as i128);
    keep_i(fixed::Q80_ONE as i128);
}
