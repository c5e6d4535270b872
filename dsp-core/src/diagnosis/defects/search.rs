//! The search of one bearing's four defect kinds and of single watched
//! lines (steps 1 to 4 and 6 of the module doc).

use crate::diagnosis::kinematics::{BearingOrders, DefectKind};
use crate::num::amplitude_db;
use crate::spectrum::SpectrumView;

use super::peaks::{not_searched, Ctx, Window1};
use super::*;

impl DefectSearch {
    /// Validates the configuration.
    pub fn new(config: DefectSearchConfig) -> Result<Self, DefectConfigError> {
        config.validate()?;
        Ok(Self { config })
    }

    /// The configuration.
    pub fn config(&self) -> &DefectSearchConfig {
        &self.config
    }

    pub(super) fn wide(&self, line: f32, h: u8, opb: f32) -> Window1 {
        let expected = f32::from(h) * line;
        Window1 {
            expected,
            half: (self.config.slip_tolerance * expected).max(self.config.min_window_bins * opb),
        }
    }

    /// Measures one watched line at `order` (see [`LineMeasurement`]).
    ///
    /// ```
    /// use dsp_core::diagnosis::defects::{DefectSearch, DefectSearchConfig};
    /// use dsp_core::spectrum::{SpectrumView, Window};
    /// let mut amps = [0.01f32; 1024];
    /// amps[320] = 0.5; // a line at order 5.0 with 64 bins per order
    /// let view = SpectrumView::new(&amps, 1.0 / 64.0, Window::Hann).unwrap();
    /// let m = DefectSearch::new(DefectSearchConfig::default()).unwrap().measure_line(&view, 5.0);
    /// assert!(m.searched && (m.found_order - 5.0).abs() < 0.02);
    /// assert!((m.prominence_db - 33.98).abs() < 0.1); // 20 log10(0.5 / 0.01)
    /// ```
    pub fn measure_line(&self, spectrum: &SpectrumView<'_>, order: f32) -> LineMeasurement {
        let w = self.wide(order, 1, spectrum.orders_per_bin());
        self.measure_line_within(spectrum, order, w.half)
    }

    /// Measures one watched line at `order` as [`Self::measure_line`], in a
    /// window of half-width `half` orders (a line that does not slip, such as
    /// a gear mesh, gets a narrow one).
    pub fn measure_line_within(
        &self,
        spectrum: &SpectrumView<'_>,
        order: f32,
        half: f32,
    ) -> LineMeasurement {
        let opb = spectrum.orders_per_bin();
        let ctx = Ctx {
            amps: spectrum.amplitudes(),
            opb,
            lobe_bins: spectrum.window().main_lobe_half_width_bins(),
            window: spectrum.window(),
            shaft_order: 1.0,
            ftf_order: 1.0,
            mask: false,
        };
        let mut m = LineMeasurement::not_searched(order);
        if !(order.is_finite() && order > 0.0 && half.is_finite() && half > 0.0) {
            return m;
        }
        let w = Window1 {
            expected: order,
            half,
        };
        if !ctx.fits(w) {
            return m;
        }
        let Some(floor) = ctx.floor(w, self.config.floor_band_orders) else {
            return m;
        };
        m.searched = true;
        m.floor = floor;
        if let Some(p) = ctx.peak(w.expected - w.half, w.expected + w.half) {
            m.found_order = p.order;
            m.amplitude = p.amplitude;
            m.prominence_db = if floor > 0.0 {
                amplitude_db(p.amplitude / floor)
            } else {
                200.0
            };
        }
        m
    }

    /// Searches all four defect kinds of one bearing in a spectrum.
    pub fn search(
        &self,
        spectrum: &SpectrumView<'_>,
        orders: &BearingOrders,
    ) -> Result<BearingDiagnosis, SearchError> {
        let pos = |v: f32| v.is_finite() && v > 0.0;
        if !(orders.lines().iter().all(|&l| pos(l))
            && pos(orders.shaft_order())
            && pos(orders.ftf_order()))
        {
            return Err(SearchError::InvalidOrders);
        }
        let cfg = &self.config;
        let ctx = Ctx {
            amps: spectrum.amplitudes(),
            opb: spectrum.orders_per_bin(),
            lobe_bins: spectrum.window().main_lobe_half_width_bins(),
            window: spectrum.window(),
            shaft_order: orders.shaft_order(),
            ftf_order: orders.ftf_order(),
            mask: cfg.mask_shaft_harmonics,
        };
        let mut results = DefectKind::ALL.map(|k| self.search_kind(&ctx, k, orders.line(k)));
        self.attribute(&ctx, &mut results);
        for r in results.iter_mut() {
            self.decide(&ctx, r, orders);
        }
        Self::cage_as_modulation(&mut results);
        Ok(BearingDiagnosis { results })
    }

    pub(super) fn search_kind(&self, ctx: &Ctx<'_>, kind: DefectKind, line: f32) -> DefectResult {
        let cfg = &self.config;
        let thr = cfg.prominence_threshold_db;
        let mut harmonics: heapless::Vec<HarmonicResult, MAX_HARMONICS> = heapless::Vec::new();
        // Stage 1: wide windows.
        for h in 1..=cfg.harmonics {
            let w = self.wide(line, h, ctx.opb);
            let floor = if ctx.fits(w) {
                ctx.floor(w, cfg.floor_band_orders)
            } else {
                None
            };
            let hr = match floor {
                None => not_searched(h, w.expected),
                Some(floor) => {
                    let peak = ctx.peak(w.expected - w.half, w.expected + w.half);
                    let (found_order, amplitude) = peak.map_or((0.0, 0.0), |p| {
                        let delta = p.order / ctx.opb - libm::roundf(p.order / ctx.opb);
                        (p.order, p.amplitude / ctx.kernel(delta))
                    });
                    HarmonicResult {
                        harmonic: h,
                        expected_order: w.expected,
                        found_order,
                        amplitude,
                        floor,
                        prominence_db: if floor > 0.0 {
                            amplitude_db(amplitude / floor)
                        } else if amplitude > 0.0 {
                            200.0
                        } else {
                            -200.0
                        },
                        searched: true,
                        found: false,
                        counted: false,
                        shared_with: None,
                        shared_bearing: None,
                    }
                }
            };
            // Capacity MAX_HARMONICS >= harmonics (validated).
            let _ = harmonics.push(hr);
        }
        // Anchor: most prominent of the first anchor_harmonics above threshold.
        let anchor = harmonics
            .iter()
            .take(usize::from(cfg.anchor_harmonics))
            .filter(|r| r.searched && r.prominence_db >= thr)
            .max_by(|a, b| a.prominence_db.total_cmp(&b.prominence_db))
            .map(|r| (r.harmonic, r.found_order));
        // Stage 2: narrow windows at h · L'.
        if let Some((ha, fa)) = anchor {
            let line_actual = fa / f32::from(ha);
            for r in harmonics.iter_mut().filter(|r| r.searched) {
                if r.harmonic == ha {
                    r.found = true;
                    continue;
                }
                let wide = self.wide(line, r.harmonic, ctx.opb);
                let c = f32::from(r.harmonic) * line_actual;
                let half =
                    (cfg.refine_bins + f32::from(r.harmonic) / (4.0 * f32::from(ha))) * ctx.opb;
                let a = (c - half).max(wide.expected - wide.half);
                let b = (c + half).min(wide.expected + wide.half);
                match ctx.peak(a, b) {
                    Some(p) => {
                        let delta = p.order / ctx.opb - libm::roundf(p.order / ctx.opb);
                        r.found_order = p.order;
                        r.amplitude = p.amplitude / ctx.kernel(delta);
                        r.prominence_db = if r.floor > 0.0 {
                            amplitude_db(r.amplitude / r.floor)
                        } else {
                            200.0
                        };
                        r.found = r.prominence_db >= thr;
                    }
                    None => {
                        r.found_order = 0.0;
                        r.amplitude = 0.0;
                        r.prominence_db = -200.0;
                    }
                }
            }
        }
        let harmonics_searched =
            u8::try_from(harmonics.iter().filter(|r| r.searched).count()).unwrap_or(u8::MAX);
        DefectResult {
            kind,
            line_order: line,
            fundamental_amplitude: harmonics.first().map_or(0.0, |r| r.amplitude),
            harmonics,
            harmonics_found: 0,
            harmonics_searched,
            anchor: anchor.map(|(h, _)| h),
            line_actual: anchor.map_or(0.0, |(h, f)| f / f32::from(h)),
            sideband_db: None,
            sidebands: 0,
            score_db: 0.0,
            detected: false,
            shared_finding: None,
        }
    }
}
