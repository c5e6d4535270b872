// Shared helpers of the frame tests (included with `#[path]`, not a test crate of its own).
#![allow(dead_code)]
use wire::frame::{BearingResult, DefectResult, FrameFlags, FrameReport, IsoZone};

/// Small deterministic generator (xorshift64*, Vigna 2016) so committed vectors are stable.
pub struct Rng(pub u64);

impl Rng {
    pub fn next_u64(&mut self) -> u64 {
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        self.0.wrapping_mul(0x2545_F491_4F6C_DD1D)
    }
    pub fn unit(&mut self) -> f32 {
        (self.next_u64() >> 40) as f32 / (1u64 << 24) as f32
    }
    pub fn range(&mut self, lo: f32, hi: f32) -> f32 {
        lo + (hi - lo) * self.unit()
    }
    pub fn below(&mut self, n: u64) -> u64 {
        self.next_u64() % n
    }
    /// A value in [lo, hi] most of the time, sometimes a special one.
    pub fn value(&mut self, lo: f32, hi: f32) -> f32 {
        match self.below(20) {
            0 => f32::NAN,
            1 => f32::INFINITY,
            2 => -1.0,
            3 => hi * 3.0,
            _ => self.range(lo, hi),
        }
    }
}

pub fn random_report(rng: &mut Rng) -> FrameReport {
    let mut r = FrameReport {
        node_id: rng.next_u64() as u16,
        seq: rng.next_u64() as u16,
        flags: FrameFlags::from_bits(rng.next_u64() as u16 & 0x7F),
        speed_rpm: rng.value(0.0, 16383.5),
        ..FrameReport::default()
    };
    r.overall.accel_rms_g = rng.value(0.0, 65.5);
    r.overall.peak_g = rng.value(0.0, 655.0);
    r.overall.crest_factor = rng.value(0.0, 25.4);
    r.overall.kurtosis = rng.value(0.0, 63.5);
    r.overall.velocity_rms_mm_s = rng.value(0.0, 655.0);
    r.overall.iso_zone = match rng.below(5) {
        0 => None,
        1 => Some(IsoZone::A),
        2 => Some(IsoZone::B),
        3 => Some(IsoZone::C),
        _ => Some(IsoZone::D),
    };
    let nb = rng.below(5) as usize;
    for _ in 0..nb {
        let mut b = BearingResult::default();
        for d in b.defects.iter_mut() {
            // Amplitudes log-uniform over 1e-6 .. 30 g to cover both range ends.
            let amp = if rng.below(20) == 0 {
                f32::NAN
            } else {
                10f32.powf(rng.range(-6.0, 1.5))
            };
            *d = DefectResult {
                score_db: rng.value(0.0, 62.0),
                amplitude_1x_g: amp,
                harmonics: rng.below(11) as u8,
                detected: rng.below(2) == 1,
                line: None,
            };
        }
        r.bearings.push(b).unwrap();
    }
    r
}

/// A random, consistent version 2 report: 0..=8 bearings, 0..=4 meshes,
/// every line state (shared lines linked to another bearing), every
/// not-searched reason, amplitudes over both range ends.
pub fn random_report_v2(rng: &mut Rng) -> FrameReport {
    use wire::frame::layout::FORMAT_VERSION_2;
    use wire::frame::{DefectKind, LineDetail, LineLink, LineState, MeshResult, NotSearchedCode};
    let mut r = random_report(rng);
    r.version = FORMAT_VERSION_2;
    r.bearings.clear();
    let nb = rng.below(9) as usize;
    for _ in 0..nb {
        let mut b = BearingResult::default();
        for d in b.defects.iter_mut() {
            let state = match rng.below(8) {
                0 | 1 => LineState::NotSearched,
                2..=4 => LineState::Searched,
                5 | 6 => LineState::Detected,
                _ if nb > 1 => LineState::Shared,
                _ => LineState::Detected,
            };
            *d = if state == LineState::NotSearched {
                let reason = [
                    NotSearchedCode::NotAnalysed,
                    NotSearchedCode::PassMissing,
                    NotSearchedCode::AboveRange,
                    NotSearchedCode::TooSlow,
                    NotSearchedCode::TooManyPasses,
                    NotSearchedCode::NoHarmonic,
                ][rng.below(6) as usize];
                let needed =
                    (reason.has_needed() && rng.below(3) > 0).then(|| 8u16 << rng.below(9));
                DefectResult {
                    score_db: f32::NAN,
                    amplitude_1x_g: f32::NAN,
                    harmonics: 0,
                    detected: false,
                    line: Some(LineDetail {
                        state,
                        reason: Some(reason),
                        needed_samples_per_rev: needed,
                        amplitude_g: f32::NAN,
                        margin_db: f32::NAN,
                        ..LineDetail::default()
                    }),
                }
            } else {
                let searched = 1 + rng.below(10) as u8;
                let found = rng.below(u64::from(searched) + 1) as u8;
                let link = (state == LineState::Shared).then(|| {
                    let mut k = rng.below(nb as u64 - 1) as u8;
                    if usize::from(k) >= r.bearings.len() {
                        k += 1; // never the bearing itself (index r.bearings.len())
                    }
                    LineLink {
                        bearing: k,
                        kind: DefectKind::ALL[rng.below(4) as usize],
                    }
                });
                DefectResult {
                    score_db: rng.value(0.0, 62.0),
                    amplitude_1x_g: f32::NAN,
                    harmonics: found,
                    detected: state.is_detection(),
                    line: Some(LineDetail {
                        state,
                        reason: None,
                        needed_samples_per_rev: None,
                        amplitude_g: if found == 0 {
                            0.0
                        } else {
                            10f32.powf(rng.range(-6.0, 1.5))
                        },
                        harmonics_searched: searched,
                        sidebands: rng.below(u64::from(found.min(3)) + 1) as u8,
                        margin_db: if found == 0 {
                            f32::NAN
                        } else {
                            rng.range(0.0, 70.0) // above 60 saturates
                        },
                        shared_with: link,
                    }),
                }
            };
        }
        r.bearings.push(b).unwrap();
    }
    for _ in 0..rng.below(5) {
        let m = if rng.below(4) == 0 {
            MeshResult::default()
        } else {
            MeshResult {
                searched: true,
                amplitude_g: 10f32.powf(rng.range(-6.0, 1.5)),
                prominence_db: rng.value(0.0, 62.0),
                sideband_gear_g: rng.value(0.0, 0.5),
                sideband_mate_g: rng.value(0.0, 0.5),
            }
        };
        r.meshes.push(m).unwrap();
    }
    r
}

/// A random status report (every defined code, bands from 1 Hz to 100 kHz,
/// kurtosis from -3 to 400 or none; above 327.67 it saturates).
pub fn random_status(rng: &mut Rng) -> wire::frame::StatusReport {
    use wire::frame::status::{BandSource, BootConfig, DownlinkResult, StatusReport, SurveyStatus};
    let pick = |rng: &mut Rng, n: u64| rng.below(n) as u8;
    let downlink = loop {
        if let Some(d) = DownlinkResult::from_code(pick(rng, 26)) {
            break d;
        }
    };
    let lo = 10f32.powf(rng.range(0.0, 4.7));
    StatusReport {
        node_id: rng.next_u64() as u16,
        seq: rng.next_u64() as u16,
        flags: FrameFlags::from_bits(rng.next_u64() as u16 & 0x7F),
        band_source: [
            BandSource::Configured,
            BandSource::Survey,
            BandSource::Unset,
        ][rng.below(3) as usize],
        boot_config: [
            BootConfig::Stored,
            BootConfig::DefaultEmpty,
            BootConfig::DefaultInvalid,
        ][rng.below(3) as usize],
        provisioned: rng.below(2) == 1,
        downlink_counter: rng.next_u64() as u32,
        last_downlink: downlink,
        refused_downlinks: rng.next_u64() as u8,
        survey: SurveyStatus::from_code(pick(rng, 9)).unwrap(),
        band_hz: [lo, lo * rng.range(1.01, 4.0)],
        band_kurtosis: if rng.below(4) == 0 {
            f32::NAN
        } else {
            rng.range(-3.0, 400.0)
        },
        ..StatusReport::default()
    }
}

pub fn to_hex(b: &[u8]) -> String {
    b.iter().map(|x| format!("{x:02x}")).collect()
}

pub fn from_hex(s: &str) -> Vec<u8> {
    (0..s.len() / 2)
        .map(|i| u8::from_str_radix(&s[2 * i..2 * i + 2], 16).unwrap())
        .collect()
}
