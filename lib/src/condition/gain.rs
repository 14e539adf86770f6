//! Per-pixel response (flat-field) factors, validated once so conditioning cannot meet a bad entry.

use super::{ConditionError, MAX_PIXELS};

/// Largest allowed gain-table entry (Q14, just under 4.0); larger factors mean a dead pixel, not a weak one.
pub const GAIN_MAX_Q14: u16 = u16::MAX;

/// A checked view of per-pixel multipliers (Q14: 16384 = 1.0), one per pixel.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct GainTable<'a> {
    factors_q14: &'a [u16],
}

impl<'a> GainTable<'a> {
    /// Validates the table: 1..=[`MAX_PIXELS`] entries, none zero.
    ///
    /// Loop bound: one pass over the entries.
    pub fn new(factors_q14: &'a [u16]) -> Result<Self, ConditionError> {
        if factors_q14.is_empty() {
            return Err(ConditionError::Empty);
        }
        if factors_q14.len() > MAX_PIXELS {
            return Err(ConditionError::TooManyPixels);
        }
        if factors_q14.contains(&0) {
            return Err(ConditionError::BadGain);
        }
        Ok(Self { factors_q14 })
    }

    /// Entries in the table.
    pub fn len(&self) -> usize {
        self.factors_q14.len()
    }

    /// Always false for a validated table.
    pub fn is_empty(&self) -> bool {
        self.factors_q14.is_empty()
    }

    /// Factor of pixel `i` (Q14); 1.0 past the end, which a length check before use rules out.
    pub(crate) fn factor_q14(&self, i: usize) -> u32 {
        self.factors_q14
            .get(i)
            .map_or(u32::from(super::ONE_Q14), |&g| u32::from(g))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn validates_entries() {
        assert_eq!(GainTable::new(&[]), Err(ConditionError::Empty));
        assert_eq!(GainTable::new(&[16384, 0]), Err(ConditionError::BadGain));
        let g = GainTable::new(&[16384, 8192]).unwrap();
        assert_eq!(g.len(), 2);
        assert_eq!(g.factor_q14(1), 8192);
        assert_eq!(g.factor_q14(5), 16384);
        let big = [1u16; MAX_PIXELS + 1];
        assert_eq!(GainTable::new(&big), Err(ConditionError::TooManyPixels));
    }
}
