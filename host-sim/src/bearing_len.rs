//! Bearing lengths in the host's TOML files (the point file and the
//! validation manifest): one reading of a `<key>_mm` / `<key>_in` pair and
//! one conversion, so both files give the core the same numbers. Lengths
//! come out in millimetres, the unit of the configuration record
//! (`element_mm`, `pitch_mm`); the defect multiples depend on their ratio
//! only.

/// Millimetres per inch (exact by definition of the inch).
pub const MM_PER_IN: f32 = 25.4;

/// A length given in inches, in millimetres.
pub fn mm_from_in(inch: f32) -> f32 {
    inch * MM_PER_IN
}

/// Both forms of one length were given: what each says.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BothGiven {
    /// The `_mm` value.
    pub mm: f32,
    /// The `_in` value.
    pub inch: f32,
}

/// The length from a `_mm` / `_in` pair in millimetres; `Ok(None)` when
/// neither is given, [`BothGiven`] when both are (each file has its own
/// rule for that: the point file refuses it, the manifest compares).
pub fn length_mm(mm: Option<f32>, inch: Option<f32>) -> Result<Option<f32>, BothGiven> {
    match (mm, inch) {
        (Some(mm), Some(inch)) => Err(BothGiven { mm, inch }),
        (Some(v), None) => Ok(Some(v)),
        (None, Some(v)) => Ok(Some(mm_from_in(v))),
        (None, None) => Ok(None),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// 1 in = 25.4 mm exactly (international yard and pound agreement, 1959).
    #[test]
    fn one_conversion() {
        assert_eq!(length_mm(None, Some(1.0)), Ok(Some(25.4)));
        assert_eq!(length_mm(Some(12.7), None), Ok(Some(12.7)));
        assert_eq!(length_mm(None, None), Ok(None));
        assert_eq!(
            length_mm(Some(25.4), Some(1.0)),
            Err(BothGiven {
                mm: 25.4,
                inch: 1.0
            })
        );
    }
}
