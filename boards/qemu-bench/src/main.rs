//! Instruction-count benchmarks of dsp-core on QEMU mps2-an386 (Cortex-M4F).
//!
//! Method (see docs/benchmarks.md): QEMU runs with `-icount shift=10`, so each
//! guest instruction advances virtual time by 1024 ns; the CMSDK APB timer0
//! (25 MHz, 32-bit down-counter at 0x4000_0000) then counts exactly 25.6
//! ticks per instruction. Every figure is (ticks - ticks of an empty
//! interval) / 25.6 over the timed calls only; inputs are prepared outside
//! the timed intervals. Results are deterministic, run to run.
//!
//! Output: one line per figure on semihosting stderr,
//! `BENCH|key|value|unit|description`, parsed by `format.py`.
#![no_std]
#![no_main]

use core::hint::black_box;
use core::ptr::{read_volatile, write_volatile};

use cortex_m_rt::{entry, exception, ExceptionFrame};
use dsp_core::frontend::biquad::BiquadCascade;
use dsp_core::config::{Bearing, BearingKinematics, PointConfig, SpeedInput};
use dsp_core::frontend::decimate::Decimator;
use dsp_core::diagnosis::defects::{DefectSearch, DefectSearchConfig};
use dsp_core::frontend::design::butter_bandpass;
use dsp_core::frontend::{FrontEnd, FrontEndConfig};
use dsp_core::diagnosis::kinematics::{BearingGeometry, BearingOrders, ShaftRatio};
use dsp_core::speed::order_track::{OrderTrackConfig, OrderTracker};
use dsp_core::pipeline::{NodePipeline, ADC_BLOCK, NODE_BINS, NODE_RING};
use dsp_core::frontend::rectify::Rectifier;
use dsp_core::spectrum::{
    real_fft, OrderSpectrum, OrderSpectrum4096, SpectrumConfig, SpectrumView, Window,
};
use dsp_core::survey::BandSurvey;
use dsp_core::speed::tach::RevMark;
use dsp_core::overall::velocity::{VelocityConfig, VelocityMeter};
use semihosting::{eprintln, process};

/// CMSDK APB timer0 registers (CTRL +0, VALUE +4, RELOAD +8).
const TIMER0: usize = 0x4000_0000;
/// Timer ticks per guest instruction under `-icount shift=10` (25 MHz x 1024 ns).
const TICKS_PER_INSTR: f64 = 25.6;
/// Input rate of the front end (Hz).
const FS: f32 = 51_200.0;

#[allow(unsafe_code)] // memory-mapped timer of the QEMU board
fn timer_init() {
    // SAFETY: timer0 of mps2-an386 is a plain MMIO block at this address.
    unsafe {
        write_volatile((TIMER0 + 8) as *mut u32, u32::MAX);
        write_volatile((TIMER0 + 4) as *mut u32, u32::MAX);
        write_volatile(TIMER0 as *mut u32, 1);
    }
}

#[allow(unsafe_code)]
#[inline(always)]
fn now() -> u32 {
    // SAFETY: read of the timer0 VALUE register.
    unsafe { read_volatile((TIMER0 + 4) as *const u32) }
}

/// Ticks of one call of `f` (down-counter: start - end).
#[inline(never)]
fn ticks(f: &mut dyn FnMut()) -> u32 {
    let a = now();
    f();
    let b = now();
    a.wrapping_sub(b)
}

struct Meter {
    empty: u32,
}

impl Meter {
    fn new() -> Self {
        timer_init();
        let mut nop = || {};
        // Warm up once, then take the empty interval (call overhead included).
        let _ = ticks(&mut nop);
        let empty = ticks(&mut nop);
        Meter { empty }
    }

    /// Instructions of one call of `f`, net of the empty interval.
    fn instr(&self, f: &mut dyn FnMut()) -> f64 {
        f64::from(ticks(f).saturating_sub(self.empty)) / TICKS_PER_INSTR
    }
}

fn report(key: &str, value: f64, unit: &str, what: &str) {
    eprintln!("BENCH|{}|{:.2}|{}|{}", key, value, unit, what);
}

/// Deterministic test signal: in-band carrier amplitude-modulated at a
/// "defect" rate plus broadband noise (xorshift32), in g.
struct Signal {
    n: u32,
    rng: u32,
}

impl Signal {
    fn new() -> Self {
        Signal {
            n: 0,
            rng: 0x1234_5678,
        }
    }
    fn next(&mut self) -> f32 {
        self.rng ^= self.rng << 13;
        self.rng ^= self.rng >> 17;
        self.rng ^= self.rng << 5;
        #[allow(clippy::cast_precision_loss)]
        let noise = (self.rng >> 8) as f32 / 16_777_216.0 - 0.5;
        #[allow(clippy::cast_precision_loss)]
        let t = self.n as f32 / FS;
        self.n = self.n.wrapping_add(1);
        let am = 1.0 + 0.5 * libm_sin(2.0 * core::f32::consts::PI * 87.0 * t);
        0.3 * noise + 0.2 * am * libm_sin(2.0 * core::f32::consts::PI * 7_000.0 * t)
    }
    fn next_i16(&mut self, counts_per_g: f32) -> i16 {
        let v = (self.next() * counts_per_g).clamp(-32767.0, 32767.0);
        #[allow(clippy::cast_possible_truncation)]
        let c = v as i16;
        c
    }
}

fn libm_sin(x: f32) -> f32 {
    // Range-reduced Taylor series; accuracy is irrelevant for a load signal.
    let tau = 2.0 * core::f32::consts::PI;
    #[allow(clippy::cast_possible_truncation, clippy::cast_precision_loss)]
    let k = (x / tau) as i32 as f32;
    let mut r = x - k * tau;
    if r > core::f32::consts::PI {
        r -= tau;
    }
    let r2 = r * r;
    r * (1.0 - r2 / 6.0 * (1.0 - r2 / 20.0 * (1.0 - r2 / 42.0 * (1.0 - r2 / 72.0))))
}

const BLOCKS: usize = 40;

fn fill(buf: &mut [f32], sig: &mut Signal) {
    buf.iter_mut().for_each(|v| *v = sig.next());
}

fn bench_front_end_stages(m: &Meter) {
    let mut sig = Signal::new();
    let mut blk = [0f32; ADC_BLOCK];
    let samples = (BLOCKS * ADC_BLOCK) as f64;

    let sos = butter_bandpass(5_000.0, 10_000.0, FS, 8).unwrap_or_default();
    let mut bp = BiquadCascade::new(sos);
    let mut total = 0.0;
    for _ in 0..BLOCKS {
        fill(&mut blk, &mut sig);
        total += m.instr(&mut || bp.process(black_box(&mut blk)));
    }
    black_box(&blk);
    report(
        "bandpass8",
        total / samples,
        "instr/sample",
        "band-pass, 8 poles (4 sections), blocks of 256",
    );

    let mut bp = BiquadCascade::new(sos);
    let mut total = 0.0;
    for _ in 0..BLOCKS {
        fill(&mut blk, &mut sig);
        total += m.instr(&mut || bp.process_map(black_box(&mut blk), |v| v * v));
    }
    black_box(&blk);
    report(
        "bandpass8_square",
        total / samples,
        "instr/sample",
        "band-pass 8 poles with the square rectifier fused (as the front end runs it)",
    );

    for (key, r) in [
        ("rectify_square", Rectifier::Square),
        ("rectify_abs", Rectifier::Abs),
    ] {
        let mut total = 0.0;
        for _ in 0..BLOCKS {
            fill(&mut blk, &mut sig);
            total += m.instr(&mut || r.apply_block(black_box(&mut blk)));
        }
        black_box(&blk);
        report(
            key,
            total / samples,
            "instr/sample",
            "rectifier alone, blocks of 256",
        );
    }

    let mut acc = dsp_core::overall::OverallAcc::new();
    let mut total = 0.0;
    for _ in 0..BLOCKS {
        fill(&mut blk, &mut sig);
        total += m.instr(&mut || acc.add_block(black_box(&mut blk)));
    }
    black_box(acc.snapshot());
    report(
        "overall_stats",
        total / samples,
        "instr/sample",
        "overall indicators (mean, RMS, peak, crest, kurtosis sums), blocks of 256",
    );

    if let Ok(mut dec) = Decimator::new(8) {
        let mut total = 0.0;
        let mut sink = 0f32;
        for _ in 0..BLOCKS {
            fill(&mut blk, &mut sig);
            total += m.instr(&mut || dec.process(black_box(&blk), |y| sink += y));
        }
        black_box(sink);
        let taps: usize = dec.stages().map(|s| s.1).sum();
        eprintln!(
            "INFO|decimator stages (factor, taps): {:?} total taps {}",
            Stages(&dec),
            taps
        );
        report(
            "decimate8",
            total / samples,
            "instr/sample",
            "decimator by 8 (>= 60 dB alias rejection), per input sample",
        );
    }

    // The envelope path as the front end runs it: band-pass and square
    // rectifier fused into the decimator's first stage (one call per block).
    let mut bp = BiquadCascade::new(sos);
    if let Ok(mut dec) = Decimator::new(8) {
        let mut total = 0.0;
        let mut sink = 0f32;
        for _ in 0..BLOCKS {
            fill(&mut blk, &mut sig);
            total += m.instr(&mut || {
                // As FrontEnd::run: the band-pass writes the squared samples
                // straight into the decimator's first stage, block by block.
                for c in black_box(&blk).chunks(dsp_core::frontend::decimate::BLOCK) {
                    dec.process_with(
                        c.len(),
                        |h| bp.process_map_into(c, h, |v| v * v),
                        |y| sink += y,
                    );
                }
            });
        }
        black_box(sink);
        report(
            "envelope_path",
            total / samples,
            "instr/sample",
            "band-pass 8 poles + square + decimate by 8 (>= 60 dB), fused as the front end runs it",
        );
    }

    for (key, vel, what) in [
        ("frontend_envelope", false, "front end as run: i16 blocks of 256, band-pass+square+decimate 8 + overall stats, velocity off"),
        ("frontend_firmware", true, "front end as the firmware runs it (default config incl. velocity RMS path)"),
    ] {
        let mut cfg = FrontEndConfig::default();
        cfg.velocity.enabled = vel;
        let Ok(mut fe) = FrontEnd::new(&cfg) else {
            report(key, -1.0, "error", "front end refused");
            continue;
        };
        let mut iblk = [0i16; ADC_BLOCK];
        let mut total = 0.0;
        let mut sink = 0f32;
        for _ in 0..BLOCKS {
            iblk.iter_mut().for_each(|c| *c = sig.next_i16(2048.0));
            total += m.instr(&mut || fe.push_i16(black_box(&iblk), |y| sink += y));
        }
        black_box(sink);
        report(key, total / samples, "instr/sample", what);
    }
}

/// Velocity RMS path alone (the front end's default), per input sample, in
/// steady state: the settling time (0.25 s) is fed first, unmeasured, so the
/// RMS accumulation is included.
fn bench_velocity(m: &Meter) {
    let Ok(mut v) = VelocityMeter::new(FS, &VelocityConfig::default()) else {
        report("velocity_path", -1.0, "error", "velocity meter refused");
        return;
    };
    let mut sig = Signal::new();
    let mut blk = [0f32; ADC_BLOCK];
    for _ in 0..60 {
        fill(&mut blk, &mut sig);
        v.process(&blk);
    }
    let mut total = 0.0;
    for _ in 0..BLOCKS {
        fill(&mut blk, &mut sig);
        total += m.instr(&mut || v.process(black_box(&blk)));
    }
    black_box(v.rms_mm_s());
    #[allow(clippy::cast_precision_loss)]
    let samples = (BLOCKS * ADC_BLOCK) as f64;
    report(
        "velocity_path",
        total / samples,
        "instr/sample",
        "VelocityMeter at 51.2 kS/s: decimate 12, 10-1000 Hz band-pass + integrator, RMS (steady state)",
    );
}

/// Band survey (commissioning mode) with its default bank at 51.2 kS/s,
/// i16 blocks of 256, per input sample.
fn bench_survey(m: &Meter) {
    let Ok(mut s) = BandSurvey::new(FS) else {
        report("band_survey", -1.0, "error", "survey refused");
        return;
    };
    let mut sig = Signal::new();
    let mut blk = [0i16; ADC_BLOCK];
    let blocks = 8;
    let mut total = 0.0;
    for _ in 0..blocks {
        blk.iter_mut().for_each(|c| *c = sig.next_i16(2048.0));
        total += m.instr(&mut || s.push_i16(black_box(&blk)));
    }
    #[allow(clippy::cast_precision_loss)]
    let samples = (blocks * ADC_BLOCK) as f64;
    report(
        "band_survey",
        total / samples,
        "instr/sample",
        "BandSurvey::new(51200) default bank, push_i16 blocks of 256, per input sample",
    );
    eprintln!(
        "INFO|band survey: {} bands at 51.2 kS/s, {:.1} M instructions per second of signal",
        s.band_count(),
        total / samples * f64::from(FS) / 1e6
    );
}

struct Stages<'a>(&'a Decimator);
impl core::fmt::Debug for Stages<'_> {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        f.debug_list().entries(self.0.stages()).finish()
    }
}

fn bench_fft<const N: usize>(m: &Meter, key_fft: &str, key_mag: &str) {
    let mut sig = Signal::new();
    let mut buf = [0f32; N];
    fill(&mut buf, &mut sig);
    let mut mags = [0f32; N];
    let mut t_fft = 0.0;
    let mut t_mag = 0.0;
    let mut t_mag_libm = 0.0;
    let reps = 3;
    for _ in 0..reps {
        fill(&mut buf, &mut sig);
        let mut ok = true;
        t_fft += m.instr(&mut || ok &= real_fft(black_box(&mut buf)).is_ok());
        if !ok {
            report(key_fft, -1.0, "error", "unsupported size");
            return;
        }
        // Magnitudes of the N/2 bins with the spectrum stage's square root
        // (the FPU's, correctly rounded), and with libm's software root
        // (the same bits) for comparison.
        t_mag += m.instr(&mut || {
            let bins = buf.chunks_exact(2);
            for (o, c) in mags.iter_mut().zip(bins) {
                if let [re, im] = c {
                    *o = dsp_core::num::sqrtf(re * re + im * im);
                }
            }
        });
        black_box(&mags);
        t_mag_libm += m.instr(&mut || {
            let bins = buf.chunks_exact(2);
            for (o, c) in mags.iter_mut().zip(bins) {
                if let [re, im] = c {
                    *o = libm::sqrtf(re * re + im * im);
                }
            }
        });
        black_box(&mags);
    }
    report(
        key_fft,
        t_fft / f64::from(reps),
        "instr/transform",
        "dsp_core::spectrum::real_fft (microfft)",
    );
    #[allow(clippy::cast_precision_loss)]
    let bins = (N / 2) as f64;
    report(
        key_mag,
        t_mag / f64::from(reps) / bins,
        "instr/bin",
        "magnitude sqrt(re^2+im^2), dsp_core::num::sqrtf (vsqrt.f32)",
    );
    eprintln!(
        "INFO|{} with libm sqrtf: {:.2} instr/bin",
        key_mag,
        t_mag_libm / f64::from(reps) / bins
    );
}

fn bench_order_spectrum(m: &Meter) {
    let Ok(mut sp) = OrderSpectrum4096::new(SpectrumConfig::with_samples_per_rev(64)) else {
        return;
    };
    let mut sig = Signal::new();
    let mut t_buf = 0.0;
    let mut t_seg = 0.0;
    let segs = 2;
    for _ in 0..segs {
        for _ in 0..4095 {
            let x = sig.next();
            t_buf += m.instr(&mut || {
                black_box(sp.push(black_box(x)));
            });
        }
        let x = sig.next();
        t_seg += m.instr(&mut || {
            black_box(sp.push(black_box(x)));
        });
    }
    report(
        "order_spectrum_4096_segment",
        t_seg / f64::from(segs),
        "instr/segment",
        "OrderSpectrum<4096> push completing a segment: mean, Hann, rfft, power average (sqrt)",
    );
    report(
        "order_spectrum_4096_buffer",
        t_buf / f64::from(segs) / 4095.0,
        "instr/sample",
        "OrderSpectrum<4096> push of a buffered sample (incl. call)",
    );
}

fn bench_order_tracker(m: &Meter) {
    let mut cfg = OrderTrackConfig::default();
    cfg.samples_per_rev = 64;
    cfg.decimation = 8;
    cfg.input_rate_hz = FS / 8.0;
    cfg.delay_input_samples = 40.0;
    cfg.min_rpm = 1200.0;
    let Ok(mut ot) = OrderTracker::<NODE_RING>::new(&cfg) else {
        report("order_track", -1.0, "error", "tracker refused");
        return;
    };
    // 1500 rpm: one revolution = 2048 input samples = 256 envelope samples.
    let rev = 2048.0f64;
    let mut sig = Signal::new();
    let mut outs = 0u32;
    let mut total = 0.0;
    let mut next_mark = 0u32;
    let n_env = 6400u32; // one second of envelope
    for j in 0..n_env {
        let t_in = f64::from(j + 1) * 8.0 - 1.0;
        while f64::from(next_mark) * rev + 100.0 <= t_in {
            let mk = RevMark {
                time_samples: f64::from(next_mark) * rev + 100.0,
                index: next_mark,
                segment_start: next_mark == 0,
                bridged: false,
            };
            total += m.instr(&mut || ot.push_mark(mk, |_| outs += 1));
            next_mark += 1;
        }
        let x = sig.next().abs();
        total += m.instr(&mut || ot.push_sample(black_box(x), |_| outs += 1));
    }
    report(
        "order_track",
        total / f64::from(outs.max(1)),
        "instr/output",
        "OrderTracker (Catmull-Rom, 64/rev) per angle-domain output sample, marks included",
    );
    eprintln!(
        "INFO|order tracker: {} outputs from {} envelope samples",
        outs, n_env
    );
}

fn geometry(rollers: u16, d: f32, pd: f32, angle: f32, ratio: f32) -> Option<BearingOrders> {
    let mult = BearingGeometry {
        rollers,
        roller_diameter: d,
        pitch_diameter: pd,
        contact_angle_deg: angle,
    }
    .multiples()
    .ok()?;
    Some(mult.orders(ShaftRatio::new(ratio).ok()?))
}

fn bench_defects(m: &Meter) {
    // Synthetic 2048-bin order spectrum, 1/64 order per bin (64 samples/rev,
    // 4096 points): noisy floor plus a few peaks.
    let mut amps = [0f32; 2048];
    let mut sig = Signal::new();
    for (k, a) in amps.iter_mut().enumerate() {
        *a = 1e-3 * (1.0 + sig.next().abs());
        if k % 229 == 0 {
            *a += 0.05;
        }
    }
    let opb = 1.0 / 64.0;
    let (Ok(view), Ok(search)) = (
        SpectrumView::new(&amps, opb, Window::Hann),
        DefectSearch::new(DefectSearchConfig::default()),
    ) else {
        return;
    };
    // Three fictional bearings on shafts at 1x, 0.6x and 0.25x the tach.
    let bearings = [
        geometry(9, 7.9, 39.0, 0.0, 1.0),
        geometry(13, 9.5, 52.0, 0.0, 0.6),
        geometry(16, 12.0, 80.0, 15.0, 0.25),
    ];
    let mut total = 0.0;
    let mut found = 0usize;
    for o in bearings.iter().flatten() {
        total += m.instr(&mut || {
            if let Ok(d) = search.search(black_box(&view), o) {
                found += d.detected().count();
            }
        });
    }
    black_box(found);
    report(
        "defects_3_bearings",
        total,
        "instr/report",
        "DefectSearch::search for 3 bearings (4 kinds x 5 harmonics each), 2048 bins",
    );
}

fn point() -> PointConfig {
    let mut p = PointConfig::default();
    p.speed = SpeedInput::Constant { rpm: 1500.0 };
    let mut push = |name: &str, rollers, d, pd| {
        let _ = p.bearings.push(Bearing {
            name: dsp_core::config::name_from(name),
            shaft: 0,
            kinematics: BearingKinematics::Geometry {
                rollers,
                roller_diameter: d,
                pitch_diameter: pd,
                contact_angle_deg: 0.0,
            },
        });
    };
    push("drive-end", 9, 7.9, 39.0);
    push("fan-end", 8, 6.7, 31.0);
    push("idler", 12, 9.5, 52.0);
    p
}

/// Figures of one whole record through a `NodePipeline` fed i16 blocks of
/// [`ADC_BLOCK`] (as the node's DMA delivers them).
struct Record {
    /// Instructions of all `push_i16` calls.
    total: f64,
    /// Blocks pushed.
    blocks: u32,
    /// The costliest single `push_i16` and its 1-based index.
    worst: f64,
    worst_at: u32,
    /// The costliest block that completed no segment (the ordinary work).
    worst_ordinary: f64,
    /// The costliest completing block (the mean), and the costliest first
    /// to sixth block after one (four window parts, transform, average).
    worst_work: [f64; 7],
    /// `finish` (defect search, report).
    finish: f64,
    segments: u32,
    decimation: u16,
    /// FNV-1a of the spectrum and the report (bit-identity check).
    fingerprint: u64,
}

/// FNV-1a 64-bit hasher, also a `fmt::Write` sink.
struct Fnv(u64);
impl Fnv {
    fn bytes(&mut self, b: &[u8]) {
        for &x in b {
            self.0 = (self.0 ^ u64::from(x)).wrapping_mul(0x0000_0100_0000_01b3);
        }
    }
}
impl core::fmt::Write for Fnv {
    fn write_str(&mut self, s: &str) -> core::fmt::Result {
        self.bytes(s.as_bytes());
        Ok(())
    }
}

/// Feeds a whole record and times every block and `finish`. A block whose
/// `push_i16` completes a spectrum segment (the 4096-point transform and the
/// power average run inside it) is told apart by `segments_missing`.
fn run_record(m: &Meter, point: &PointConfig) -> Option<Record> {
    let mut p = NodePipeline::new(point).ok()?;
    let mut sig = Signal::new();
    let mut blk = [0i16; ADC_BLOCK];
    let mut r = Record {
        total: 0.0,
        blocks: 0,
        worst: 0.0,
        worst_at: 0,
        worst_ordinary: 0.0,
        worst_work: [0.0; 7],
        finish: 0.0,
        segments: 0,
        decimation: p.decimation(),
        fingerprint: 0,
    };
    let counts_per_g = 32_768.0 / 50.0;
    // Blocks since the last one that completed a segment: that block (the
    // mean) and the next six carry the segment's work (window in four
    // parts, transform, average; one part per block), so they are not
    // "ordinary".
    let mut since_segment = u32::MAX;
    while !p.complete() && r.blocks < 4000 {
        blk.iter_mut().for_each(|c| *c = sig.next_i16(counts_per_g));
        let missing = p.segments_missing();
        let t = m.instr(&mut || p.push_i16(black_box(&blk)));
        r.total += t;
        r.blocks += 1;
        if t > r.worst {
            r.worst = t;
            r.worst_at = r.blocks;
        }
        since_segment = if p.segments_missing() == missing {
            since_segment.saturating_add(1)
        } else {
            0
        };
        if since_segment > 6 && t > r.worst_ordinary {
            r.worst_ordinary = t;
        }
        if let Some(w) = usize::try_from(since_segment)
            .ok()
            .and_then(|i| r.worst_work.get_mut(i))
        {
            *w = w.max(t);
        }
    }
    let mut segs = 0u32;
    let mut rep = None;
    r.finish = m.instr(&mut || {
        let rp = p.finish();
        segs = rp.segments;
        rep = Some(rp);
    });
    r.segments = segs;
    // Bit-identity fingerprint of the record's outputs: FNV-1a over the
    // spectrum's bits and the report's Debug text (every field, f32 printed
    // exactly by the shortest round-trip form).
    let mut h = Fnv(0xcbf2_9ce4_8422_2325);
    for v in p.spectrum() {
        h.bytes(&v.to_bits().to_le_bytes());
    }
    let _ = core::fmt::Write::write_fmt(&mut h, format_args!("{:?}", rep));
    r.fingerprint = h.0;
    Some(r)
}

/// Instructions as milliseconds at the nRF52840's 64 MHz, one cycle each
/// (a lower bound: FP loads and multiply-accumulates take more on silicon).
fn ms_at_64mhz(instr: f64) -> f64 {
    instr / 64_000.0
}

fn bench_pipeline(m: &Meter) {
    let point = point();
    let Some(r) = run_record(m, &point) else {
        report("pipeline", -1.0, "error", "pipeline refused");
        return;
    };
    #[allow(clippy::cast_precision_loss)]
    let samples = f64::from(r.blocks) * ADC_BLOCK as f64;
    report(
        "pipeline_per_sample",
        r.total / samples,
        "instr/sample",
        "NodePipeline (4096 points, 3 bearings, constant 1500 rpm) push_i16, per input sample",
    );
    report(
        "pipeline_finish",
        r.finish,
        "instr/report",
        "NodePipeline::finish (defect search, overall, report)",
    );
    report(
        "pipeline_record",
        r.total + r.finish,
        "instr/record",
        "whole record incl. finish",
    );
    eprintln!(
        "INFO|pipeline: decimation {}, {} samples ({:.2} s), {} segments",
        r.decimation,
        samples,
        samples / f64::from(FS),
        r.segments
    );
    node_blocks(&r, "51k2", 51_200.0);
    bench_pipeline_profile(m, &point, r.decimation);

    // The same measuring point at the nRF52840 board's fixed rate.
    let mut p25 = point;
    p25.sample_rate_hz = 25_600.0;
    match run_record(m, &p25) {
        Some(r) => node_blocks(&r, "25k6", 25_600.0),
        None => report("node_block_worst_25k6", -1.0, "error", "pipeline refused"),
    }
}

/// Where the pipeline's instructions per sample go: its own front end
/// (the point's band, rectifier and decimation) with and without the
/// velocity path, and the envelope decimator alone; the rest of
/// `pipeline_per_sample` is order tracking, spectrum buffering and the
/// segment transforms.
fn bench_pipeline_profile(m: &Meter, point: &PointConfig, decimation: u16) {
    let samples = (BLOCKS * ADC_BLOCK) as f64;
    for (key, vel) in [
        ("profile_frontend_novel", false),
        ("profile_frontend", true),
    ] {
        let mut cfg = FrontEndConfig::default();
        cfg.sample_rate_hz = point.sample_rate_hz;
        cfg.band_hz = point.band();
        cfg.poles = point.poles;
        cfg.rectifier = point.rectifier;
        cfg.decimation = decimation;
        cfg.counts_to_g = point.counts_to_g;
        cfg.adc_full_scale = point.adc_full_scale;
        cfg.velocity.enabled = vel;
        let Ok(mut fe) = FrontEnd::new(&cfg) else {
            report(key, -1.0, "error", "front end refused");
            continue;
        };
        let mut sig = Signal::new();
        let mut iblk = [0i16; ADC_BLOCK];
        let mut total = 0.0;
        let mut sink = 0f32;
        for _ in 0..BLOCKS {
            iblk.iter_mut().for_each(|c| *c = sig.next_i16(32_768.0 / 50.0));
            total += m.instr(&mut || fe.push_i16(black_box(&iblk), |y| sink += y));
        }
        black_box(sink);
        report(
            key,
            total / samples,
            "instr/sample",
            "the pipeline's own front end (point band, rectifier, its decimation), velocity off / on",
        );
    }
    if let Ok(mut dec) = Decimator::new(decimation) {
        let mut sig = Signal::new();
        let mut blk = [0f32; ADC_BLOCK];
        let mut total = 0.0;
        let mut sink = 0f32;
        for _ in 0..BLOCKS {
            fill(&mut blk, &mut sig);
            total += m.instr(&mut || dec.process(black_box(&blk), |y| sink += y));
        }
        black_box(sink);
        eprintln!("INFO|pipeline decimator stages (factor, taps): {:?}", Stages(&dec));
        report(
            "profile_decimator",
            total / samples,
            "instr/sample",
            "the pipeline's envelope decimator alone, per input sample",
        );
    }
}

/// The worst single block of the node pipeline beside the block period:
/// what the sample queue must absorb (figures only, nothing asserted).
fn node_blocks(r: &Record, tag: &str, fs: f64) {
    let mut key = heapless::String::<40>::new();
    let mut row = |name: &str, value: f64, unit: &str, what: &str| {
        key.clear();
        let _ = core::fmt::Write::write_fmt(&mut key, format_args!("{name}_{tag}"));
        report(&key, value, unit, what);
    };
    row(
        "node_block_worst",
        r.worst,
        "instr/block",
        "NodePipeline::push_i16 of one 256-sample block, the costliest (the block after a segment completed: its transform)",
    );
    row(
        "node_block_ordinary",
        r.worst_ordinary,
        "instr/block",
        "the costliest block that neither completes a segment nor carries its work (window parts, transform, average: the next six blocks)",
    );
    row(
        "node_block_mean",
        r.total / f64::from(r.blocks.max(1)),
        "instr/block",
        "mean over the record's blocks",
    );
    row(
        "node_finish",
        r.finish,
        "instr/call",
        "NodePipeline::finish after the last block (sampling already stopped)",
    );
    #[allow(clippy::cast_precision_loss)]
    let period_ms = ADC_BLOCK as f64 / fs * 1000.0;
    let worst_ms = ms_at_64mhz(r.worst);
    eprintln!("INFO|outputs at {:.1} kS/s: fingerprint {:016x}", fs / 1000.0, r.fingerprint);
    eprintln!(
        "INFO|segment work at {:.1} kS/s, worst of each block from the completing one on: {:.0?} instr",
        fs / 1000.0,
        r.worst_work
    );
    eprintln!(
        "INFO|node at {:.1} kS/s ({} blocks, {} segments): worst block {:.0} instr (block {}) = {:.2} ms at 64 MHz, {:.2} block periods of {:.1} ms ({:.2} of 5.0 ms at 51.2 kS/s, {:.2} of 10.0 ms at 25.6 kS/s); ordinary worst {:.2} ms, mean {:.2} ms; finish {:.2} ms",
        fs / 1000.0,
        r.blocks,
        r.segments,
        r.worst,
        r.worst_at,
        worst_ms,
        worst_ms / period_ms,
        period_ms,
        worst_ms / 5.0,
        worst_ms / 10.0,
        ms_at_64mhz(r.worst_ordinary),
        ms_at_64mhz(r.total / f64::from(r.blocks.max(1))),
        ms_at_64mhz(r.finish)
    );
}

/// The node's block ring (`firmware::ring`): what the sampling interrupt
/// spends copying a block in and the cycle copying it out.
fn bench_ring(m: &Meter) {
    use firmware::ring::{BlockRing, NODE_DEPTH};
    static RING: BlockRing<NODE_DEPTH, ADC_BLOCK> = BlockRing::new();
    let Some((mut tx, mut rx)) = RING.split() else {
        return;
    };
    let mut sig = Signal::new();
    let mut blk = [0i16; ADC_BLOCK];
    let mut out = [0i16; ADC_BLOCK];
    let (mut t_push, mut t_pop) = (0.0, 0.0);
    for _ in 0..BLOCKS {
        blk.iter_mut().for_each(|c| *c = sig.next_i16(2048.0));
        t_push += m.instr(&mut || {
            let _ = black_box(tx.push(black_box(&blk)));
        });
        t_pop += m.instr(&mut || {
            black_box(rx.pop_into(black_box(&mut out)));
        });
        black_box(&out);
    }
    #[allow(clippy::cast_precision_loss)]
    let n = BLOCKS as f64;
    report(
        "ring_push",
        t_push / n,
        "instr/block",
        "firmware::ring Producer::push of one 256-sample block (the sampling interrupt's copy)",
    );
    report(
        "ring_pop",
        t_pop / n,
        "instr/block",
        "firmware::ring Consumer::pop_into of one 256-sample block (the cycle's copy)",
    );
}

fn memory() {
    use core::mem::size_of;
    let r = |k: &str, n: usize, what: &str| {
        #[allow(clippy::cast_precision_loss)]
        report(k, n as f64, "bytes", what);
    };
    r(
        "mem_node_pipeline",
        size_of::<NodePipeline>(),
        "NodePipeline = Pipeline<4096, 1025, 2048>",
    );
    r("mem_frontend", size_of::<FrontEnd>(), "FrontEnd");
    r("mem_bandpass", size_of::<BiquadCascade>(), "BiquadCascade");
    r("mem_decimator", size_of::<Decimator>(), "Decimator");
    r(
        "mem_order_tracker",
        size_of::<OrderTracker<NODE_RING>>(),
        "OrderTracker<2048>",
    );
    r(
        "mem_order_spectrum",
        size_of::<OrderSpectrum<4096, NODE_BINS>>(),
        "OrderSpectrum<4096, 1025> (the node's: bins up to S/4 orders)",
    );
    r(
        "mem_tach",
        size_of::<dsp_core::speed::tach::TachTracker>(),
        "TachTracker",
    );
    r(
        "mem_velocity",
        size_of::<VelocityMeter>(),
        "VelocityMeter (inside the front end)",
    );
    r(
        "mem_band_survey",
        size_of::<BandSurvey>(),
        "BandSurvey (commissioning mode, not held during measurements)",
    );
    r(
        "mem_defect_search",
        size_of::<DefectSearch>(),
        "DefectSearch",
    );
    r(
        "mem_block_ring",
        size_of::<firmware::ring::BlockRing<{ firmware::ring::NODE_DEPTH }, ADC_BLOCK>>(),
        "BlockRing<NODE_DEPTH = 3, 256> (the node's sample queue)",
    );
    r(
        "mem_point",
        size_of::<PointConfig>(),
        "PointConfig (copy held by the pipeline)",
    );
}

#[entry]
fn main() -> ! {
    let m = Meter::new();
    eprintln!("INFO|empty interval {} ticks", m.empty);
    memory();
    bench_front_end_stages(&m);
    bench_fft::<1024>(&m, "rfft_1024", "magnitude_1024");
    bench_fft::<4096>(&m, "rfft_4096", "magnitude_4096");
    bench_order_spectrum(&m);
    bench_order_tracker(&m);
    bench_defects(&m);
    bench_pipeline(&m);
    bench_velocity(&m);
    bench_survey(&m);
    bench_ring(&m);
    eprintln!("INFO|done");
    process::exit(0)
}

#[exception]
#[allow(unsafe_code)]
unsafe fn HardFault(_ef: &ExceptionFrame) -> ! {
    eprintln!("HardFault");
    process::exit(3)
}
