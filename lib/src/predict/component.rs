//! The fine-structure components n l j → m l' j' of one line, with their share of the emitted photons.
use super::air::Air;
use super::error::PredictError;
use super::level::{recoil_term_q80, Atom};
use super::nucleus::Nucleus;
use super::strength::{angular_components, Channel, Channels};
use super::units::{check_pair, wavelength_fm};
use crate::fixed::mul_div_u128;

/// One fine-structure component of a line.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Component {
    /// Orbital quantum number l of the upper level.
    pub upper_l: u8,
    /// Twice the total angular momentum j of the upper level (j = 3/2 → 3).
    pub upper_j2: u8,
    /// Orbital quantum number of the lower level.
    pub lower_l: u8,
    /// Twice j of the lower level.
    pub lower_j2: u8,
    /// Vacuum wavelength, femtometres.
    pub vacuum_fm: u64,
    /// Wavelength in the chosen air, femtometres; `None` in vacuum mode or below 200 nm.
    pub air_fm: Option<u64>,
    /// Share of the line's photon rate, parts per million (the shares of a line add up to about 10⁶).
    pub relative_ppm: u32,
}

/// A component before normalisation: energy gap (Q80 of mₑc²) and weight S·σ³ on an arbitrary scale.
#[derive(Clone, Copy)]
pub(crate) struct RawComponent {
    pub upper_l: u8,
    pub upper_j2: u8,
    pub lower_l: u8,
    pub lower_j2: u8,
    pub gap_q80: u128,
    pub strength: u128,
}

/// A channel with its angular components and their common denominator.
type ChannelParts = (Channel, [(u8, u8, u32); 3], u32);

/// Walks channels and their angular components; yields strengths S on a common scale (no σ³ yet).
/// At most 3 (2m − 1) items for lower level m.
pub(crate) struct RawComponents {
    upper: LevelSide,
    lower: LevelSide,
    channels: Channels,
    current: Option<ChannelParts>,
    slot: usize,
}

impl RawComponents {
    pub(crate) fn new(
        nucleus: Nucleus,
        lower: u8,
        upper: u8,
    ) -> Result<RawComponents, PredictError> {
        check_pair(lower, upper)?;
        let atom = Atom::new(nucleus.z(), nucleus.mass_ratio_e9()).ok_or(PredictError::Overflow)?;
        Ok(RawComponents {
            upper: LevelSide::new(atom, upper)?,
            lower: LevelSide::new(atom, lower)?,
            channels: Channels::new(upper, lower),
            current: None,
            slot: 0,
        })
    }
}

impl Iterator for RawComponents {
    type Item = Result<RawComponent, PredictError>;

    fn next(&mut self) -> Option<Self::Item> {
        // Bounded by the channel count (≤ 77) × 3 slots.
        loop {
            let (ch, comps, total) = match self.current {
                Some(c) if self.slot < 3 => c,
                _ => {
                    let ch = self.channels.next()?;
                    let (comps, total) = angular_components(ch.upper_l, ch.lower_l);
                    self.current = Some((ch, comps, total));
                    self.slot = 0;
                    (ch, comps, total)
                }
            };
            let Some(&(uj2, lj2, share)) = comps.get(self.slot) else {
                self.slot = 3;
                continue;
            };
            self.slot += 1;
            if share == 0 || ch.weight == 0 {
                continue;
            }
            return Some(self.build(ch, uj2, lj2, share, total));
        }
    }
}

/// Level energies of one principal level n, with the few most recent Dirac values kept: channels walk
/// j upward, so four slots spare almost every recomputation.
struct LevelSide {
    atom: Atom,
    n: u8,
    recoil_scale_q80: u128,
    slots: [(u8, i128); 4],
    next_slot: usize,
}

impl LevelSide {
    fn new(atom: Atom, n: u8) -> Result<LevelSide, PredictError> {
        Ok(LevelSide {
            atom,
            n,
            recoil_scale_q80: atom.recoil_scale_q80(n).ok_or(PredictError::Overflow)?,
            slots: [(0, 0); 4],
            next_slot: 0,
        })
    }

    /// ε(n, l, j) in Q80.
    fn energy(&mut self, l: u8, j2: u8) -> Result<i128, PredictError> {
        let dirac = match self.slots.iter().find(|(j, _)| *j == j2) {
            Some(&(_, e)) => e,
            None => {
                let e = self
                    .atom
                    .dirac_q80(self.n, j2)
                    .ok_or(PredictError::Overflow)?;
                if let Some(slot) = self.slots.get_mut(self.next_slot) {
                    *slot = (j2, e);
                }
                self.next_slot = (self.next_slot + 1) % 4;
                e
            }
        };
        Ok(dirac + recoil_term_q80(self.recoil_scale_q80, l, j2))
    }
}

impl RawComponents {
    fn build(
        &mut self,
        ch: Channel,
        uj2: u8,
        lj2: u8,
        share: u32,
        total: u32,
    ) -> Result<RawComponent, PredictError> {
        let eu = self.upper.energy(ch.upper_l, uj2)?;
        let el = self.lower.energy(ch.lower_l, lj2)?;
        let gap = eu
            .checked_sub(el)
            .filter(|g| *g > 0)
            .ok_or(PredictError::Overflow)? as u128;
        let strength = mul_div_u128(ch.weight as u128 * share as u128, 1 << 24, total as u128)
            .ok_or(PredictError::Overflow)?;
        Ok(RawComponent {
            upper_l: ch.upper_l,
            upper_j2: uj2,
            lower_l: ch.lower_l,
            lower_j2: lj2,
            gap_q80: gap,
            strength,
        })
    }
}

/// Photon-rate weight S·(σ/σ_ref)³ of a component, on the strength's scale.
pub(crate) fn photon_weight(raw: &RawComponent, ref_gap_q80: u128) -> Result<u128, PredictError> {
    let mut w = raw.strength;
    for _ in 0..3 {
        w = mul_div_u128(w, raw.gap_q80, ref_gap_q80).ok_or(PredictError::Overflow)?;
    }
    Ok(w)
}

/// The components of one line with their shares; built by [`Components::new`].
pub struct Components {
    raw: RawComponents,
    air: Air,
    ref_gap_q80: u128,
    total_weight: u128,
}

impl Components {
    /// Components of `nucleus` m → n (`lower` = m, `upper` = n), in channel order.
    ///
    /// Work: two passes over at most 3 (2m − 1) ≤ 231 components.
    pub fn new(
        nucleus: Nucleus,
        lower: u8,
        upper: u8,
        air: &Air,
    ) -> Result<Components, PredictError> {
        let (ref_gap_q80, total_weight) = reference_and_total(nucleus, lower, upper)?;
        Ok(Components {
            raw: RawComponents::new(nucleus, lower, upper)?,
            air: *air,
            ref_gap_q80,
            total_weight,
        })
    }
}

/// First component's gap and the sum of photon weights of all components.
pub(crate) fn reference_and_total(
    nucleus: Nucleus,
    lower: u8,
    upper: u8,
) -> Result<(u128, u128), PredictError> {
    let mut ref_gap = 0;
    let mut total: u128 = 0;
    for raw in RawComponents::new(nucleus, lower, upper)? {
        let raw = raw?;
        if ref_gap == 0 {
            ref_gap = raw.gap_q80;
        }
        total = total
            .checked_add(photon_weight(&raw, ref_gap)?)
            .ok_or(PredictError::Overflow)?;
    }
    if total == 0 {
        return Err(PredictError::Overflow);
    }
    Ok((ref_gap, total))
}

impl Iterator for Components {
    type Item = Result<Component, PredictError>;

    fn next(&mut self) -> Option<Self::Item> {
        let raw = match self.raw.next()? {
            Ok(r) => r,
            Err(e) => return Some(Err(e)),
        };
        Some(self.finish(&raw))
    }
}

impl Components {
    fn finish(&self, raw: &RawComponent) -> Result<Component, PredictError> {
        let w = photon_weight(raw, self.ref_gap_q80)?;
        let ppm = mul_div_u128(w, 1_000_000, self.total_weight).ok_or(PredictError::Overflow)?;
        let vacuum_fm = wavelength_fm(raw.gap_q80)?;
        Ok(Component {
            upper_l: raw.upper_l,
            upper_j2: raw.upper_j2,
            lower_l: raw.lower_l,
            lower_j2: raw.lower_j2,
            vacuum_fm,
            air_fm: self.air.air_wavelength_fm(vacuum_fm),
            relative_ppm: ppm as u32,
        })
    }
}
