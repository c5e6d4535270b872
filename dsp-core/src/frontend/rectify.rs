//! Rectifier of the band-passed signal (the demodulation step of the
//! envelope path).

/// How the band-passed signal is turned into an envelope.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Rectifier {
    /// Full-wave rectification |x|.
    Abs,
    /// Squared envelope x^2 (energy; common practice for envelope spectra).
    #[default]
    Square,
}

impl Rectifier {
    /// Applies the rectifier to one sample.
    ///
    /// ```
    /// use dsp_core::frontend::rectify::Rectifier;
    /// assert_eq!(Rectifier::Abs.apply(-2.0), 2.0);
    /// assert_eq!(Rectifier::Square.apply(-2.0), 4.0);
    /// ```
    #[inline]
    pub fn apply(self, x: f32) -> f32 {
        match self {
            Self::Abs => x.abs(),
            Self::Square => x * x,
        }
    }

    /// Applies the rectifier to a block in place.
    pub fn apply_block(self, buf: &mut [f32]) {
        match self {
            Self::Abs => buf.iter_mut().for_each(|x| *x = x.abs()),
            Self::Square => buf.iter_mut().for_each(|x| *x *= *x),
        }
    }
}
