//! Arbitrary bytes into the WAV reader; what it accepts is fed through a
//! small pipeline. Neither may panic, and non-finite samples that reach the
//! pipeline must come back as the NON_FINITE quality flag (never silently).
#![no_main]

use dsp_core::config::{PointConfig, SpeedInput};
use dsp_core::pipeline::{Pipeline, ADC_BLOCK};
use dsp_core::report::QualityFlags;
use host_sim::wav::{parse_wav, ReadOptions};
use libfuzzer_sys::fuzz_target;

/// Samples fed at most (keeps an execution short).
const MAX_FED: usize = 1 << 15;

type Small = Pipeline<1024, 512, 2048>;

fn pipeline(rate: u32) -> Small {
    let mut point = PointConfig::default();
    point.speed = SpeedInput::Constant { rpm: 1500.0 };
    point.revolutions = 16;
    // The file's rate when the pipeline accepts it, else the default point.
    let mut at_rate = point.clone();
    at_rate.sample_rate_hz = rate as f32;
    Small::new(&at_rate)
        .or_else(|_| Small::new(&point))
        .expect("the default point with a constant speed is valid")
}

fuzz_target!(|data: &[u8]| {
    let Some((&mode, bytes)) = data.split_first() else {
        return;
    };
    let opts = if mode & 1 == 1 {
        ReadOptions::accept_truncated()
    } else {
        ReadOptions::strict()
    };
    let Ok(wav) = parse_wav(bytes, opts) else {
        return;
    };
    let mut p = pipeline(wav.info.sample_rate);
    let mut non_finite = false;
    match (&wav.raw_i16, mode & 2 == 2) {
        (Some(raw), true) => {
            let ch = raw.first().map_or(&[][..], |c| &c[..c.len().min(MAX_FED)]);
            for block in ch.chunks(ADC_BLOCK) {
                p.push_i16(block);
            }
        }
        _ => {
            let ch = wav
                .channels
                .first()
                .map_or(&[][..], |c| &c[..c.len().min(MAX_FED)]);
            non_finite = ch.iter().any(|x| !x.is_finite());
            for block in ch.chunks(ADC_BLOCK) {
                p.push_f32(block);
            }
        }
    }
    let report = p.finish();
    if non_finite {
        assert!(report.flags.contains(QualityFlags::NON_FINITE));
    }
});
