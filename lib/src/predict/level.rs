//! Energy of one fine-structure level n l j of a one-electron ion.
//!
//! Dirac energy with the leading recoil terms (the form used in the CODATA adjustments):
//!
//! E − Mc² = m_r c² [f(n,j) − 1] − m_r² c² / (2M) [f(n,j) − 1]²
//!           + (1 − δ_l0) / (κ (2l+1)) · (Zα)⁴ m_r³ c² / (2 n³ m_N²)
//!
//! with f(n,j) = [1 + (Zα)² / (n − δ)²]^(−1/2), δ = (j+½) − √((j+½)² − (Zα)²), M = mₑ + m_N,
//! m_r = mₑ m_N / M. The last (Barker–Glover) term splits l at equal j by a few 10⁻¹¹ relative.
//! QED (Lamb) shifts are left out: about 0.4 pm on Lyman α and below 0.3 pm on Balmer lines of H.
//!
//! Energies are returned as ε = E / (mₑ c²) in Q80 (raw / 2^80), negative for bound levels.
use super::constants::{ALPHA_E13, MAX_N};
use crate::fixed::{isqrt_u128, mul_div_u128, Q80_ONE};

/// Q56 scale used inside square roots (raw / 2^56), so that `x << 56` stays within 128 bits.
pub(crate) const Q56_ONE: u128 = 1 << 56;

/// (Zα)² in the scale `one` (Q56 or Q80).
const fn z_alpha_squared(z: u8, one: u128) -> Option<u128> {
    let z2 = (z as u128) * (z as u128);
    mul_div_u128(
        z2 * ALPHA_E13 * ALPHA_E13,
        one,
        100_000_000_000_000_000_000_000_000,
    )
}

/// Per-nucleus quantities shared by all its levels, computed once.
#[derive(Clone, Copy)]
pub(crate) struct Atom {
    za2: u128,
    za2_56: u128,
    mass_ratio_e9: u128,
    total_e9: u128,
    mu: u128,
}

impl Atom {
    /// `z` nuclear charge, `mass_ratio_e9` nuclear / electron mass × 10^9.
    pub(crate) fn new(z: u8, mass_ratio_e9: u64) -> Option<Atom> {
        if z == 0 || mass_ratio_e9 == 0 {
            return None;
        }
        let r = mass_ratio_e9 as u128;
        let total_e9 = r + 1_000_000_000; // M / mₑ × 10^9
        Some(Atom {
            za2: z_alpha_squared(z, Q80_ONE)?,
            za2_56: z_alpha_squared(z, Q56_ONE)?,
            mass_ratio_e9: r,
            total_e9,
            mu: mul_div_u128(r, Q80_ONE, total_e9)?, // m_r / mₑ
        })
    }

    /// Dirac + recoil part of ε for level n with 2j = `j2` (l-independent), Q80.
    pub(crate) fn dirac_q80(&self, n: u8, j2: u8) -> Option<i128> {
        if n == 0 || n > MAX_N || j2.is_multiple_of(2) || j2 >= 2 * n {
            return None;
        }
        self.dirac_k_q80(n, (j2 as u128).div_ceil(2) * Q56_ONE)
    }

    /// The same for a real-valued k = j + ½ (Q56), as used for a blend's effective upper or lower level:
    /// the energy is smooth in k, and a line's centroid moves with the strength-weighted mean of 1/k.
    pub(crate) fn dirac_k_q80(&self, n: u8, k_q56: u128) -> Option<i128> {
        if n == 0 || n > MAX_N || k_q56 < Q56_ONE / 2 || k_q56 > (n as u128) * Q56_ONE {
            return None;
        }
        // √(k² − (Zα)²) in Q56, then δ = (Zα)² / (k + √…) — the sum form avoids cancellation.
        let k2 = mul_div_u128(k_q56, k_q56, Q56_ONE)?;
        let radicand = k2.checked_sub(self.za2_56)?;
        let root56 = isqrt_u128(radicand.checked_shl(56)?);
        let delta = mul_div_u128(self.za2, Q80_ONE, (k_q56 << 24) + (root56 << 24))?;
        let nd = (n as u128 * Q80_ONE).checked_sub(delta)?;
        let nd2 = mul_div_u128(nd, nd, Q80_ONE)?;
        let x = mul_div_u128(self.za2, Q80_ONE, nd2)?;
        // f − 1 = −x / (s (1 + s)), s = √(1 + x): again no cancellation for small x.
        let s56 = isqrt_u128((Q56_ONE + (x >> 24)).checked_shl(56)?);
        let s = s56 << 24;
        let den = mul_div_u128(s, Q80_ONE + s, Q80_ONE)?;
        let g = mul_div_u128(x, Q80_ONE, den)?; // g = 1 − f > 0
        let t1 = mul_div_u128(self.mu, g, Q80_ONE)?; // m_r (1 − f) / mₑ
        let t2 = mul_div_u128(
            mul_div_u128(t1, t1, Q80_ONE)?,
            1_000_000_000,
            2 * self.total_e9,
        )?;
        Some(-((t1 + t2) as i128))
    }

    /// (Zα)⁴ μ³ / (2 n³ (m_N/mₑ)²) in Q80: the Barker–Glover scale of level n.
    pub(crate) fn recoil_scale_q80(&self, n: u8) -> Option<u128> {
        let za4 = mul_div_u128(self.za2, self.za2, Q80_ONE)?;
        let mu3 = mul_div_u128(mul_div_u128(self.mu, self.mu, Q80_ONE)?, self.mu, Q80_ONE)?;
        let a = mul_div_u128(za4, mu3, Q80_ONE)?;
        let n3 = (n as u128) * (n as u128) * (n as u128);
        let r = self.mass_ratio_e9;
        mul_div_u128(a, 1_000_000_000_000_000_000, 2 * n3 * r * r)
    }
}

/// Barker–Glover term of level l, 2j = `j2`, given the level's [`Atom::recoil_scale_q80`]:
/// scale / (κ (2l+1)) with κ = −(l+1) for j = l+½ and κ = l for j = l−½; zero for s levels.
pub(crate) fn recoil_term_q80(scale_q80: u128, l: u8, j2: u8) -> i128 {
    if l == 0 {
        return 0;
    }
    let two_l1 = 2 * l as u128 + 1;
    let (kappa_abs, negative) = if j2 == 2 * l + 1 {
        (l as u128 + 1, true)
    } else {
        (l as u128, false)
    };
    let bg = (scale_q80 / (kappa_abs * two_l1)) as i128;
    if negative {
        -bg
    } else {
        bg
    }
}

/// ε(n, l, j) = E / (mₑc²) in Q80 (raw / 2^80) for nuclear charge `z` and nuclear / electron mass ratio
/// × 10^9; `j2` is 2j. `None` for a level that does not exist.
///
/// Work: fixed, 17 [`mul_div_u128`] (≤ 128 loop steps each) and 2 square
/// roots (≤ 64 steps each).
pub fn level_energy_q80(z: u8, mass_ratio_e9: u64, n: u8, l: u8, j2: u8) -> Option<i128> {
    if n == 0 || n > MAX_N || l >= n {
        return None;
    }
    // j = l ± ½ and j ≥ ½.
    let valid_j = j2 == 2 * l + 1 || (l > 0 && j2 == 2 * l - 1);
    if !valid_j {
        return None;
    }
    let atom = Atom::new(z, mass_ratio_e9)?;
    let scale = atom.recoil_scale_q80(n)?;
    Some(atom.dirac_q80(n, j2)? + recoil_term_q80(scale, l, j2))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::predict::Nucleus;

    fn eps(nu: Nucleus, n: u8, l: u8, j2: u8) -> i128 {
        level_energy_q80(nu.z(), nu.mass_ratio_e9(), n, l, j2).unwrap()
    }

    #[test]
    fn ground_state_is_about_minus_alpha_squared_over_two() {
        // ε(1s) ≈ −μ α²/2 = −2.6611e-5 for H (α² / 2 = 2.6626e-5, μ = 0.999456).
        let e = eps(Nucleus::H1, 1, 0, 1);
        let want = -(26_611 * (Q80_ONE as i128 / 1_000_000_000)); // −2.6611e-5
        let rel = (e - want).abs() * 100_000 / want.abs();
        assert!(rel < 5, "{e} vs {want}");
    }

    #[test]
    fn dirac_degeneracy_in_j_holds_up_to_recoil_term() {
        // 2s½ and 2p½ share j: they differ only by the Barker–Glover term (~1e-11 relative).
        let s = eps(Nucleus::H1, 2, 0, 1);
        let p = eps(Nucleus::H1, 2, 1, 1);
        assert!((s - p).abs() < s.abs() / 10_000_000_000);
        // 2p3/2 lies above 2p1/2 by about 0.365 cm⁻¹ of 27 420 cm⁻¹ binding: 1.3e-5 relative.
        let p32 = eps(Nucleus::H1, 2, 1, 3);
        let split = p32 - p;
        assert!(split > 0);
        let rel_e7 = split * 10_000_000 / s.abs();
        assert!((125..=140).contains(&rel_e7), "{rel_e7}");
    }

    #[test]
    fn invalid_levels_are_refused() {
        assert_eq!(level_energy_q80(1, 1, 0, 0, 1), None);
        assert_eq!(level_energy_q80(1, 1, 41, 0, 1), None);
        assert_eq!(level_energy_q80(1, 1, 2, 2, 5), None);
        assert_eq!(level_energy_q80(1, 1, 2, 1, 5), None);
        assert_eq!(level_energy_q80(1, 1, 2, 0, 3), None);
    }
}
