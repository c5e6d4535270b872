//! Envelope order spectrum: angle-domain envelope samples → windowed real FFT
//! → peak-amplitude spectrum, power-averaged over segments.
//!
//! Input is the envelope resampled at a constant `S` samples per revolution
//! of the tach shaft. A segment of `N` samples spans `R = N / S` revolutions,
//! so bin `k` sits at order `k / R = k · S / N` ([`OrderSpectrum::orders_per_bin`]).
//!
//! Per segment: remove the mean, apply the window, `microfft::real::rfft_N`,
//! and scale to **peak amplitude** in the input unit (g for an envelope of
//! acceleration in g):
//!
//! ```text
//! A_k = 2 |X_k| / (N · CG)      k = 1 .. N/2-1
//! A_0 =   |X_0| / (N · CG)      (≈ 0 after mean removal)
//! ```
//!
//! `CG` is the window's coherent gain (mean of the window; Harris 1978, "On
//! the use of windows for harmonic analysis with the DFT", Proc. IEEE 66(1)):
//! periodic Hann `w[n] = 0.5 - 0.5 cos(2πn/N)` has `CG = 0.5` and a worst-case
//! scalloping loss of 1.42 dB at half a bin; the 5-term flat-top below has
//! `CG = a0 = 0.21557895` and a scalloping loss under 0.01 dB. The Nyquist
//! bin, which microfft packs into bin 0's imaginary part, is dropped.
//!
//! Averaging is a power average (`sqrt(mean(A²))` per bin), which keeps the
//! line amplitudes and lowers the variance of the noise floor. The running
//! average is kept directly in amplitude form so no third buffer is needed.
//!
//! The average may keep only the lowest `H <= N/2` bins (the node keeps the
//! bins up to `S/4` orders, all that its search reads; see
//! [`crate::pipeline::NODE_BINS`]).
//!
//! RAM: the segment buffer (`4·N` bytes) plus the amplitude accumulator
//! (`4·H` bytes) plus a few words: 24 600 bytes for `N = 4096, H = 2048`,
//! 20 500 bytes for the node's `H = 1025`
//! (`core::mem::size_of::<OrderSpectrum4096>()` is checked in a test).
//! The FFT runs in place in the segment buffer.

use core::fmt;

pub use microfft::Complex32;

use crate::num::{sqrtf, usize_to_f32};

/// Spectral window.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum Window {
    /// Periodic Hann: good frequency resolution, 1.42 dB worst scalloping.
    #[default]
    Hann,
    /// 5-term flat-top (coefficients as in `scipy.signal.windows.flattop`):
    /// amplitude accurate to < 0.01 dB between bins, main lobe ±5 bins.
    FlatTop,
}

/// Flat-top cosine-sum coefficients a0..a4 (`w = Σ (-1)^k a_k cos(2πkn/N)`).
pub const FLAT_TOP_COEFFS: [f32; 5] = [
    0.215_578_95,
    0.416_631_58,
    0.277_263_16,
    0.083_578_947,
    0.006_947_368,
];

impl Window {
    /// Coherent gain (mean of the window).
    pub fn coherent_gain(self) -> f32 {
        match self {
            Window::Hann => 0.5,
            Window::FlatTop => FLAT_TOP_COEFFS[0],
        }
    }

    /// Half-width of the main lobe in bins (Hann 2, flat-top 5).
    pub(crate) fn main_lobe_half_width_bins(self) -> f32 {
        match self {
            Window::Hann => 2.0,
            Window::FlatTop => 5.0,
        }
    }

    /// Window value at sample `n` of `len` (periodic, DFT-even form).
    /// Always inlined: it runs once per sample of every segment, and with
    /// two spectrum sizes in one image the compiler otherwise calls it.
    #[inline(always)]
    pub fn value(self, n: usize, len: usize) -> f32 {
        let c = cos_turn(n, len);
        match self {
            Window::Hann => 0.5 - 0.5 * c,
            Window::FlatTop => {
                // cos(kθ) from Chebyshev polynomials of cos θ: one libm call per sample.
                let c2 = 2.0 * c * c - 1.0;
                let c3 = c * (4.0 * c * c - 3.0);
                let c4 = 2.0 * c2 * c2 - 1.0;
                let [a0, a1, a2, a3, a4] = FLAT_TOP_COEFFS;
                a0 - a1 * c + a2 * c2 - a3 * c3 + a4 * c4
            }
        }
    }

    /// Gain of the window's spectral kernel at `delta` bins from a line,
    /// relative to the on-bin gain (1.0 at 0). Used to correct interpolated
    /// peak amplitudes. Hann: `sinc(δ)/(1-δ²)` (Harris 1978). Flat-top: 1
    /// (its scalloping is below 0.01 dB).
    pub(crate) fn kernel_gain(self, delta: f32) -> f32 {
        match self {
            Window::Hann => {
                let d = delta.abs();
                if d < 1e-6 {
                    return 1.0;
                }
                if (d - 1.0).abs() < 1e-4 {
                    return 0.5; // limit of sinc(δ)/(1-δ²) at δ = 1
                }
                let pd = core::f32::consts::PI * d;
                (libm::sinf(pd) / pd) / (1.0 - d * d)
            }
            Window::FlatTop => 1.0,
        }
    }
}

/// How segments are combined.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum Averaging {
    /// Power average of all segments since the last reset.
    #[default]
    PowerMean,
    /// Keep only the latest segment.
    Latest,
}

/// cos(2 pi n / len). For len divisible by 8 (every FFT size) the angle is
/// folded exactly in integers into [0, pi/4] and evaluated by f32 Taylor
/// polynomials (truncation < 3e-8, below f32 rounding): about 30
/// instructions on the Cortex-M4F, where libm's cosf goes through software
/// f64 (about 1,300 instructions per window sample, measured in
/// boards/qemu-bench). Other lengths use libm.
fn cos_turn(n: usize, len: usize) -> f32 {
    if len == 0 || len % 8 != 0 {
        let theta = 2.0 * core::f32::consts::PI * usize_to_f32(n) / usize_to_f32(len.max(1));
        return libm::cosf(theta);
    }
    let k = n % len;
    let k = k.min(len - k); // cos is even: [0, len/2]
    let (k, sign) = if k > len / 4 {
        (len / 2 - k, -1.0f32) // cos(pi - x) = -cos x: [0, len/4]
    } else {
        (k, 1.0)
    };
    let step = 2.0 * core::f32::consts::PI / usize_to_f32(len);
    let v = if k > len / 8 {
        // cos(pi/2 - x) = sin x, x in [0, pi/4]
        let x = step * usize_to_f32(len / 4 - k);
        let x2 = x * x;
        x * (1.0 - x2 / 6.0 * (1.0 - x2 / 20.0 * (1.0 - x2 / 42.0 * (1.0 - x2 / 72.0))))
    } else {
        let x = step * usize_to_f32(k);
        let x2 = x * x;
        1.0 - x2 / 2.0
            * (1.0 - x2 / 12.0 * (1.0 - x2 / 30.0 * (1.0 - x2 / 56.0 * (1.0 - x2 / 90.0))))
    };
    sign * v
}

/// Configuration of an [`OrderSpectrum`].
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct SpectrumConfig {
    /// Angle-domain samples per revolution of the tach shaft (`S`, 2..=N).
    pub samples_per_rev: u32,
    /// Spectral window.
    pub window: Window,
    /// Segment combination.
    pub averaging: Averaging,
}

impl Default for SpectrumConfig {
    fn default() -> Self {
        Self {
            samples_per_rev: 64,
            window: Window::Hann,
            averaging: Averaging::PowerMean,
        }
    }
}

impl SpectrumConfig {
    /// A config with the given samples per revolution and default window/averaging.
    pub fn with_samples_per_rev(samples_per_rev: u32) -> Self {
        Self {
            samples_per_rev,
            ..Self::default()
        }
    }
}

/// Error of [`OrderSpectrum::new`], [`real_fft`] and [`SpectrumView::new`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum SpectrumError {
    /// Samples per revolution not in `2..=N`.
    SamplesPerRev,
    /// Length not a supported FFT size.
    UnsupportedSize,
    /// Orders per bin not finite and positive.
    OrdersPerBin,
    /// The amplitude slice is empty or holds NaN, infinite or negative values.
    InvalidAmplitudes,
}

impl fmt::Display for SpectrumError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            SpectrumError::SamplesPerRev => "samples per revolution must be in 2..=N",
            SpectrumError::UnsupportedSize => "unsupported FFT size",
            SpectrumError::OrdersPerBin => "orders per bin must be finite and positive",
            SpectrumError::InvalidAmplitudes => "amplitude spectrum is empty or not finite",
        })
    }
}

impl core::error::Error for SpectrumError {}

/// In-place real FFT of `buf` with microfft. Supported lengths: 512, 1024,
/// 2048, 4096 (and 8192, 16384 with the `large-fft` feature). Output bin 0
/// holds DC in `re` and the Nyquist value in `im` (microfft's packing).
pub fn real_fft(buf: &mut [f32]) -> Result<&mut [Complex32], SpectrumError> {
    macro_rules! dispatch {
        ($($n:literal => $f:path $(, $feat:literal)?;)*) => {
            match buf.len() {
                $(
                    $(#[cfg(feature = $feat)])?
                    $n => match <&mut [f32; $n]>::try_from(buf) {
                        Ok(a) => Ok(&mut $f(a)[..]),
                        Err(_) => Err(SpectrumError::UnsupportedSize),
                    },
                )*
                _ => Err(SpectrumError::UnsupportedSize),
            }
        };
    }
    dispatch! {
        512 => microfft::real::rfft_512;
        1024 => microfft::real::rfft_1024;
        2048 => microfft::real::rfft_2048;
        4096 => microfft::real::rfft_4096;
        8192 => microfft::real::rfft_8192, "large-fft";
        16384 => microfft::real::rfft_16384, "large-fft";
    }
}

/// What [`OrderSpectrum::push`] did with a sample.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum PushOutcome {
    /// Stored; the segment is not full yet.
    Buffered,
    /// The segment was completed, transformed and accumulated.
    SegmentDone,
    /// The segment was completed but held a non-finite sample: discarded and
    /// counted in [`OrderSpectrum::rejected_segments`].
    SegmentRejected,
}

/// A borrowed amplitude spectrum with its order axis, as consumed by
/// [`crate::diagnosis::defects`].
#[derive(Debug, Clone, Copy)]
pub struct SpectrumView<'a> {
    amplitudes: &'a [f32],
    orders_per_bin: f32,
    window: Window,
}

impl<'a> SpectrumView<'a> {
    /// Validates a spectrum: non-empty, all values finite and `>= 0`,
    /// `orders_per_bin` finite and positive.
    pub fn new(
        amplitudes: &'a [f32],
        orders_per_bin: f32,
        window: Window,
    ) -> Result<Self, SpectrumError> {
        if !(orders_per_bin.is_finite() && orders_per_bin > 0.0) {
            return Err(SpectrumError::OrdersPerBin);
        }
        if amplitudes.is_empty() || amplitudes.iter().any(|a| !(a.is_finite() && *a >= 0.0)) {
            return Err(SpectrumError::InvalidAmplitudes);
        }
        Ok(Self {
            amplitudes,
            orders_per_bin,
            window,
        })
    }

    /// Peak amplitudes per bin.
    pub fn amplitudes(&self) -> &'a [f32] {
        self.amplitudes
    }

    /// Order spacing of the bins.
    pub fn orders_per_bin(&self) -> f32 {
        self.orders_per_bin
    }

    /// Window the spectrum was computed with.
    pub fn window(&self) -> Window {
        self.window
    }

    /// Highest order represented (last bin).
    pub fn max_order(&self) -> f32 {
        usize_to_f32(self.amplitudes.len().saturating_sub(1)) * self.orders_per_bin
    }
}

/// Fixed-capacity envelope order spectrum: `N`-sample segments, the lowest
/// `H` of the `N/2` output bins averaged (`1 <= H <= N/2`, checked at compile
/// time; bins above `H` are computed by the FFT and dropped).
///
/// ```
/// use dsp_core::spectrum::{OrderSpectrum512, SpectrumConfig, PushOutcome};
/// let mut s = OrderSpectrum512::new(SpectrumConfig::with_samples_per_rev(16)).unwrap();
/// // 0.2 g line at order 3.5 on a 1 g offset (32 revolutions, 16 samples/rev).
/// for n in 0..512 {
///     let angle = 2.0 * core::f32::consts::PI * 3.5 * n as f32 / 16.0;
///     s.push(1.0 + 0.2 * libm::cosf(angle));
/// }
/// assert_eq!(s.segments(), 1);
/// let k = (3.5 / s.orders_per_bin()) as usize;
/// assert!((s.amplitudes()[k] - 0.2).abs() < 1e-4);
/// ```
#[derive(Debug, Clone)]
pub struct OrderSpectrum<const N: usize, const H: usize> {
    buf: [f32; N],
    acc: [f32; H],
    fill: usize,
    tainted: bool,
    segments: u32,
    rejected: u32,
    config: SpectrumConfig,
    /// Work left on a completed segment (deferred mode, see [`Self::step`]).
    pending: Pending,
    /// Samples that arrived while `pending` work held the buffer.
    queue: [f32; QUEUE],
    queued: usize,
}

/// Samples [`OrderSpectrum::push_deferred`] holds while a completed
/// segment's work is spread over the next six calls of
/// [`OrderSpectrum::step`] (512 B). The node's 1600 order samples per second
/// (64 per revolution at 1500 rpm) bring 48 in six 5 ms blocks at 51.2 kS/s
/// and 96 in six 10 ms blocks at 25.6 kS/s. When it fills (a faster order
/// rate), the pending work is finished at once: the same results, only
/// that block is longer.
pub const QUEUE: usize = 128;

/// The end-of-segment work still to do, in order: mean removal and window
/// (in parts), the transform, the power average (one per
/// [`OrderSpectrum::step`]).
#[derive(Debug, Clone, Copy, PartialEq)]
enum Pending {
    None,
    /// Window part `.1` of [`WINDOW_PARTS`] is next; `.0` is the mean.
    Window(f32, usize),
    Transform,
    Accumulate,
}

/// Parts the window step is split into (a quarter of the segment each: the
/// window costs about as much as the transform on the Cortex-M4F).
const WINDOW_PARTS: usize = 4;

/// 512-point order spectrum (256 bins).
pub type OrderSpectrum512 = OrderSpectrum<512, 256>;
/// 1024-point order spectrum (512 bins).
pub type OrderSpectrum1024 = OrderSpectrum<1024, 512>;
/// 2048-point order spectrum (1024 bins).
pub type OrderSpectrum2048 = OrderSpectrum<2048, 1024>;
/// 4096-point order spectrum (2048 bins); 24 KiB of RAM.
pub type OrderSpectrum4096 = OrderSpectrum<4096, 2048>;
/// 8192-point order spectrum (host analysis, `large-fft` feature).
#[cfg(feature = "large-fft")]
pub type OrderSpectrum8192 = OrderSpectrum<8192, 4096>;
/// 16384-point order spectrum (host analysis, `large-fft` feature).
#[cfg(feature = "large-fft")]
pub type OrderSpectrum16384 = OrderSpectrum<16384, 8192>;

impl<const N: usize, const H: usize> OrderSpectrum<N, H> {
    /// A new, empty spectrum. Fails if `samples_per_rev` is not in `2..=N`,
    /// or if `N` is 8192/16384 without the `large-fft` feature.
    pub fn new(config: SpectrumConfig) -> Result<Self, SpectrumError> {
        Self::check(&config)?;
        let mut sp = Self::unconfigured();
        sp.apply(config);
        Ok(sp)
    }

    /// Validates `config` and starts over with it in place (buffers cleared,
    /// not rebuilt); on error `self` is left unchanged.
    pub fn reconfigure(&mut self, config: SpectrumConfig) -> Result<(), SpectrumError> {
        Self::check(&config)?;
        self.apply(config);
        Ok(())
    }

    /// Checks `samples_per_rev` in `2..=N` and the size.
    pub(crate) fn check(config: &SpectrumConfig) -> Result<(), SpectrumError> {
        let s =
            usize::try_from(config.samples_per_rev).map_err(|_| SpectrumError::SamplesPerRev)?;
        if !(2..=N).contains(&s) {
            return Err(SpectrumError::SamplesPerRev);
        }
        if N > 4096 && !cfg!(feature = "large-fft") {
            return Err(SpectrumError::UnsupportedSize);
        }
        Ok(())
    }

    /// An empty spectrum for constant context (default configuration),
    /// configured later with [`Self::reconfigure`].
    pub(crate) const fn unconfigured() -> Self {
        const {
            assert!(H >= 1 && H * 2 <= N, "H must be 1..=N/2");
            assert!(
                N == 512 || N == 1024 || N == 2048 || N == 4096 || N == 8192 || N == 16384,
                "N must be a supported FFT size (512..=4096, or 8192/16384 with large-fft)"
            );
        }
        Self {
            buf: [0.0; N],
            acc: [0.0; H],
            fill: 0,
            tainted: false,
            segments: 0,
            rejected: 0,
            config: SpectrumConfig {
                samples_per_rev: 64,
                window: Window::Hann,
                averaging: Averaging::PowerMean,
            },
            pending: Pending::None,
            queue: [0.0; QUEUE],
            queued: 0,
        }
    }

    /// Starts over with a checked configuration, in place.
    pub(crate) fn apply(&mut self, config: SpectrumConfig) {
        self.config = config;
        self.buf.fill(0.0);
        self.reset();
    }

    /// The configuration.
    pub fn config(&self) -> &SpectrumConfig {
        &self.config
    }

    /// Clears the average and the partly filled segment (counters too).
    pub fn reset(&mut self) {
        self.acc.fill(0.0);
        self.fill = 0;
        self.tainted = false;
        self.segments = 0;
        self.rejected = 0;
        self.pending = Pending::None;
        self.queued = 0;
    }

    /// Adds one angle-domain envelope sample; transforms and accumulates when
    /// the segment is full.
    pub fn push(&mut self, x: f32) -> PushOutcome {
        if self.pending != Pending::None {
            self.flush();
        }
        if self.store(x) {
            self.transform_and_accumulate()
        } else {
            self.outcome_of_store()
        }
    }

    /// As [`Self::push`], but a completed segment's work (window, transform,
    /// power average) is left to later calls of [`Self::step`], one part
    /// each, so no single call carries the whole of it; samples arriving
    /// meanwhile are queued ([`QUEUE`]; when full, the work is finished at
    /// once). Results equal [`Self::push`] bit for bit once [`Self::flush`]
    /// has run. A completed segment returns [`PushOutcome::SegmentDone`] and
    /// counts in [`Self::segments_in`] at once, in [`Self::segments`] when
    /// its average is done.
    ///
    /// ```
    /// use dsp_core::spectrum::{OrderSpectrum512, SpectrumConfig, PushOutcome};
    /// let cfg = SpectrumConfig::with_samples_per_rev(16);
    /// let (mut a, mut b) = (OrderSpectrum512::new(cfg).unwrap(), OrderSpectrum512::new(cfg).unwrap());
    /// for n in 0..1100 {
    ///     let x = libm::sinf(n as f32 * 0.7);
    ///     a.push(x);
    ///     if b.push_deferred(x) == PushOutcome::SegmentDone {
    ///         assert_eq!(b.segments_in(), b.segments() + 1);
    ///     }
    ///     if n % 8 == 7 {
    ///         b.step();
    ///     }
    /// }
    /// b.flush();
    /// assert_eq!((a.segments(), b.segments()), (2, 2));
    /// assert_eq!(a.amplitudes(), b.amplitudes());
    /// ```
    pub fn push_deferred(&mut self, x: f32) -> PushOutcome {
        if self.pending != Pending::None {
            if let Some(slot) = self.queue.get_mut(self.queued) {
                *slot = x;
                self.queued += 1;
                return PushOutcome::Buffered;
            }
            self.flush();
        }
        if self.store(x) {
            self.pending = Pending::Window(self.segment_mean(), 0);
            PushOutcome::SegmentDone
        } else {
            self.outcome_of_store()
        }
    }

    /// Does the next part of a completed segment's deferred work, if any:
    /// mean removal and window (a quarter of the segment per call; the mean
    /// itself is taken when the segment completes), then the transform, then
    /// the power average
    /// (after which the queued samples are taken in). Returns whether work
    /// was done.
    pub fn step(&mut self) -> bool {
        match self.pending {
            Pending::None => return false,
            Pending::Window(mean, part) => {
                self.window_part(mean, part);
                self.pending = if part + 1 < WINDOW_PARTS {
                    Pending::Window(mean, part + 1)
                } else {
                    Pending::Transform
                };
            }
            Pending::Transform => {
                self.pending = if self.transform_segment() {
                    Pending::Accumulate
                } else {
                    Pending::None
                };
            }
            Pending::Accumulate => {
                self.accumulate_segment();
                self.pending = Pending::None;
            }
        }
        if self.pending == Pending::None {
            let n = core::mem::take(&mut self.queued);
            for i in 0..n {
                let x = self.queue.get(i).copied().unwrap_or(0.0);
                // Fewer than N queued samples: at most one segment completes.
                let _ = self.push_deferred(x);
            }
        }
        true
    }

    /// Finishes any deferred work (and takes in the queued samples).
    pub fn flush(&mut self) {
        while self.step() {}
    }

    /// Segments in, counting one whose deferred work is still pending.
    pub fn segments_in(&self) -> u32 {
        self.segments
            .saturating_add(u32::from(self.pending != Pending::None))
    }

    /// The outcome of a [`Self::store`] that completed no clean segment.
    fn outcome_of_store(&self) -> PushOutcome {
        if self.fill == 0 {
            PushOutcome::SegmentRejected
        } else {
            PushOutcome::Buffered
        }
    }

    /// Stores one sample; true when it completed a clean segment (ready to
    /// transform). A segment with a non-finite sample is counted rejected.
    fn store(&mut self, x: f32) -> bool {
        if !x.is_finite() {
            self.tainted = true;
        }
        if let Some(slot) = self.buf.get_mut(self.fill) {
            *slot = x;
        }
        self.fill += 1;
        if self.fill < N {
            return false;
        }
        self.fill = 0;
        if core::mem::take(&mut self.tainted) {
            self.rejected = self.rejected.saturating_add(1);
            return false;
        }
        true
    }

    /// Pushes a block; returns the number of segments accumulated during it.
    pub fn push_slice(&mut self, xs: &[f32]) -> u32 {
        xs.iter()
            .filter(|&&x| self.push(x) == PushOutcome::SegmentDone)
            .count()
            .try_into()
            .unwrap_or(u32::MAX)
    }

    fn transform_and_accumulate(&mut self) -> PushOutcome {
        self.window_segment();
        if !self.transform_segment() {
            return PushOutcome::SegmentRejected;
        }
        self.accumulate_segment();
        PushOutcome::SegmentDone
    }

    /// Removes the segment's mean and applies the window, in place.
    fn window_segment(&mut self) {
        let mean = self.segment_mean();
        for part in 0..WINDOW_PARTS {
            self.window_part(mean, part);
        }
    }

    /// The segment's mean. Chunked partial sums keep the f32 rounding error
    /// of the mean small.
    fn segment_mean(&self) -> f32 {
        self.buf
            .chunks(64)
            .map(|c| c.iter().sum::<f32>())
            .sum::<f32>()
            / usize_to_f32(N)
    }

    /// Removes `mean` and applies the window to part `part` of
    /// [`WINDOW_PARTS`] of the segment (the same operations per sample as
    /// in one pass).
    fn window_part(&mut self, mean: f32, part: usize) {
        let window = self.config.window;
        let len = N / WINDOW_PARTS;
        let start = part * len;
        if let Some(run) = self.buf.get_mut(start..start + len) {
            for (i, v) in run.iter_mut().enumerate() {
                *v = (*v - mean) * window.value(start + i, N);
            }
        }
    }

    /// The real FFT of the windowed segment, in place (bin k is
    /// `buf[2k], buf[2k + 1]`, microfft's layout); false (and the segment
    /// counted rejected) for an unsupported size, unreachable for a
    /// validated N.
    fn transform_segment(&mut self) -> bool {
        if real_fft(&mut self.buf).is_err() {
            self.rejected = self.rejected.saturating_add(1);
            return false;
        }
        true
    }

    /// Adds the transformed segment to the power average.
    fn accumulate_segment(&mut self) {
        let window = self.config.window;
        let n_f = usize_to_f32(N);
        let bins = self.buf.chunks_exact(2).map(|c| match c {
            [re, im] => (*re, *im),
            _ => (0.0, 0.0),
        });
        let scale = 2.0 / (n_f * window.coherent_gain());
        let m = match self.config.averaging {
            Averaging::PowerMean => self.segments.saturating_add(1),
            Averaging::Latest => 1,
        };
        // Running power mean held in amplitude form: a² ← a² + (x² - a²)/m.
        let inv_m = 1.0 / crate::num::usize_to_f32(usize::try_from(m).unwrap_or(usize::MAX));
        for (k, (a, (re, im))) in self.acc.iter_mut().zip(bins).enumerate() {
            let im = if k == 0 { 0.0 } else { im }; // bin 0 im holds Nyquist
            let s = if k == 0 { 0.5 * scale } else { scale };
            let p = (re * re + im * im) * s * s;
            let prev = *a * *a;
            *a = sqrtf(prev + (p - prev) * inv_m);
        }
        self.segments = self.segments.saturating_add(1);
    }

    /// Number of segments in the average.
    pub fn segments(&self) -> u32 {
        self.segments
    }

    /// Number of segments discarded because they held non-finite samples.
    pub fn rejected_segments(&self) -> u32 {
        self.rejected
    }

    /// Samples in the current, partly filled segment.
    pub fn pending_samples(&self) -> usize {
        self.fill
    }

    /// Averaged peak amplitudes, the lowest `H` bins; bin `k` is order
    /// `k · orders_per_bin()`.
    /// All zero before the first segment.
    pub fn amplitudes(&self) -> &[f32] {
        &self.acc
    }

    /// Order spacing of the bins: `samples_per_rev / N` (= 1 / revolutions per segment).
    pub fn orders_per_bin(&self) -> f32 {
        crate::num::usize_to_f32(usize::try_from(self.config.samples_per_rev).unwrap_or(0))
            / usize_to_f32(N)
    }

    /// Revolutions per segment (`N / samples_per_rev`).
    pub fn revolutions_per_segment(&self) -> f32 {
        usize_to_f32(N)
            / crate::num::usize_to_f32(usize::try_from(self.config.samples_per_rev).unwrap_or(1))
    }

    /// A validated view for defect extraction; `None` before the first segment.
    pub fn view(&self) -> Option<SpectrumView<'_>> {
        if self.segments == 0 {
            return None;
        }
        SpectrumView::new(&self.acc, self.orders_per_bin(), self.config.window).ok()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn cos_turn_matches_f64_cos() {
        // Reference: f64 cosine (libm). Folded path: within 2 f32 ulp of 1;
        // the libm cosf fallback (len 12) has the f32 angle rounding on top.
        for len in [8usize, 16, 512, 1024, 4096, 16384, 12] {
            let tol = if len % 8 == 0 { 2.5e-7 } else { 5e-7 };
            for n in 0..len {
                let want = libm::cos(2.0 * core::f64::consts::PI * n as f64 / len as f64);
                let got = f64::from(cos_turn(n, len));
                assert!((got - want).abs() < tol, "len {len} n {n}: {got} vs {want}");
            }
        }
    }

    #[test]
    fn ram_of_4096() {
        // 4096·4 + 2048·4 bytes of buffers, the deferred-work queue
        // (QUEUE·4) and the small fields.
        let sz = core::mem::size_of::<OrderSpectrum4096>();
        extern crate std;
        std::println!(
            "OrderSpectrum4096 {sz} B, BearingDiagnosis {} B",
            core::mem::size_of::<crate::diagnosis::defects::BearingDiagnosis>()
        );
        let base = 24 * 1024 + QUEUE * 4;
        assert!((base..=base + 64).contains(&sz), "{sz}");
    }

    #[test]
    fn kept_bins_equal_the_full_spectrum() {
        // Same segments into a full (256-bin) and a truncated (65-bin)
        // spectrum: the kept bins are the same bits.
        let mut full = OrderSpectrum512::new(SpectrumConfig::with_samples_per_rev(16)).unwrap();
        let mut low =
            OrderSpectrum::<512, 65>::new(SpectrumConfig::with_samples_per_rev(16)).unwrap();
        for n in 0..2048u32 {
            let x = libm::sinf(n as f32 * 0.9) + 0.3 * libm::cosf(n as f32 * 0.05);
            full.push(x);
            low.push(x);
        }
        assert_eq!(low.segments(), 4);
        assert_eq!(low.amplitudes().len(), 65);
        assert!(low
            .amplitudes()
            .iter()
            .zip(full.amplitudes())
            .all(|(a, b)| a.to_bits() == b.to_bits()));
    }

    #[test]
    fn deferred_work_gives_the_same_spectrum_bit_for_bit() {
        // Steps every 1, 5 and 40 samples (the last overflows the queue and
        // finishes the work at once), a segment with a NaN in between.
        let cfg = SpectrumConfig::with_samples_per_rev(16);
        for every in [1usize, 5, 40, 100_000] {
            let mut a = OrderSpectrum512::new(cfg).unwrap();
            let mut b = OrderSpectrum512::new(cfg).unwrap();
            let (mut done_a, mut done_b) = (0, 0);
            for n in 0..2600usize {
                let x = if n == 700 {
                    f32::NAN
                } else {
                    1.0 + libm::sinf(n as f32 * 0.37) + 0.1 * libm::cosf(n as f32 * 2.1)
                };
                done_a += usize::from(a.push(x) == PushOutcome::SegmentDone);
                done_b += usize::from(b.push_deferred(x) == PushOutcome::SegmentDone);
                assert_eq!(a.segments(), b.segments_in(), "{every} {n}");
                if n % every == every - 1 {
                    b.step();
                }
            }
            b.flush();
            assert!(!b.step());
            assert_eq!((done_a, a.segments(), a.rejected_segments()), (4, 4, 1));
            assert_eq!((done_b, b.segments(), b.rejected_segments()), (4, 4, 1));
            assert_eq!(a.pending_samples(), b.pending_samples());
            assert!(a
                .amplitudes()
                .iter()
                .zip(b.amplitudes())
                .all(|(x, y)| x.to_bits() == y.to_bits()));
        }
    }

    #[test]
    fn nan_segment_is_rejected() {
        let mut s = OrderSpectrum512::new(SpectrumConfig::with_samples_per_rev(16)).unwrap();
        s.push(f32::NAN);
        let done = s.push_slice(&[0.0; 511]);
        assert_eq!(done, 0);
        assert_eq!(s.rejected_segments(), 1);
        assert_eq!(s.segments(), 0);
        assert!(s.view().is_none());
    }

    #[test]
    fn bad_samples_per_rev() {
        assert_eq!(
            OrderSpectrum512::new(SpectrumConfig::with_samples_per_rev(1)).err(),
            Some(SpectrumError::SamplesPerRev)
        );
    }
}
