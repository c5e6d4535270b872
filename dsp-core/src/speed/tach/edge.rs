//! Rising-edge detection on a digitised tach channel (host tools: a tach
//! recorded as a signal, not captured as timer ticks).

use core::fmt;

/// Why an [`EdgeDetector`] was rejected.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum EdgeDetectorError {
    /// Thresholds must be finite with `low < high`.
    BadThresholds,
}

impl fmt::Display for EdgeDetectorError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("edge thresholds must be finite with low < high")
    }
}

impl core::error::Error for EdgeDetectorError {}

/// Rising-edge detector with hysteresis on a digitised tach channel.
///
/// An edge is armed once the signal is below `low` and confirmed when it then
/// exceeds `high`; its time is the last upward crossing of the mid level
/// `(low + high) / 2` before confirmation, linearly interpolated between the
/// two samples around it. Works across blocks. Non-finite samples are skipped
/// and break the interpolation pair.
///
/// ```
/// use dsp_core::speed::tach::EdgeDetector;
/// let mut d = EdgeDetector::new(0.3, 0.7).unwrap();
/// let x = [0.0, 0.0, 0.25, 0.75, 1.0, 1.0];
/// let mut edges = [0.0f64; 1];
/// let mut n = 0;
/// d.process(&x, |t| { edges[0] = t; n += 1 });
/// assert_eq!(n, 1);
/// assert!((edges[0] - 2.5).abs() < 1e-9); // mid level 0.5 crossed half-way from 2 to 3
/// ```
#[derive(Clone, Copy, Debug)]
pub struct EdgeDetector {
    low: f32,
    high: f32,
    mid: f32,
    armed: bool,
    candidate: Option<f64>,
    prev: Option<f32>,
    n: u64,
}

impl EdgeDetector {
    /// Creates a detector with hysteresis thresholds `low < high`.
    pub fn new(low: f32, high: f32) -> Result<Self, EdgeDetectorError> {
        if !(low.is_finite() && high.is_finite() && low < high) {
            return Err(EdgeDetectorError::BadThresholds);
        }
        Ok(Self {
            low,
            high,
            mid: 0.5 * (low + high),
            armed: false,
            candidate: None,
            prev: None,
            n: 0,
        })
    }

    /// Samples processed so far.
    pub fn samples_seen(&self) -> u64 {
        self.n
    }

    /// Processes a block; `edge` receives each rising-edge time in input samples.
    pub fn process(&mut self, block: &[f32], mut edge: impl FnMut(f64)) {
        for &x in block {
            let i = self.n;
            self.n = self.n.saturating_add(1);
            if !x.is_finite() {
                self.prev = None;
                continue;
            }
            if let Some(p) = self.prev {
                if self.armed && p < self.mid && x >= self.mid {
                    let frac = f64::from((self.mid - p) / (x - p));
                    self.candidate = Some((i - 1) as f64 + frac);
                }
            }
            if self.armed && x > self.high {
                // Confirmed; without a mid crossing pair (e.g. after NaN) use this sample.
                edge(self.candidate.unwrap_or(i as f64));
                self.armed = false;
                self.candidate = None;
            } else if x < self.low {
                self.armed = true;
                self.candidate = None;
            }
            self.prev = Some(x);
        }
    }
}
