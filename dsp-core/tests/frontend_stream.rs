//! Streaming is bit-identical however the input is split into blocks
//! (property test with random splits, including empty blocks). Reference: the
//! same front end fed the whole record in one call.
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::indexing_slicing,
    clippy::panic,
    clippy::cast_possible_truncation
)]

mod common;

use common::frontend::read_f32_le;
use dsp_core::frontend::rectify::Rectifier;
use dsp_core::frontend::{FrontEnd, FrontEndConfig};
use proptest::prelude::*;

fn config(abs: bool, decimation: u16) -> FrontEndConfig {
    let mut cfg = FrontEndConfig::default();
    cfg.sample_rate_hz = 12000.0;
    cfg.band_hz = [2000.0, 5000.0];
    cfg.poles = 8;
    cfg.decimation = decimation;
    cfg.rectifier = if abs {
        Rectifier::Abs
    } else {
        Rectifier::Square
    };
    cfg.counts_to_g = 1.6 / 32768.0;
    cfg.adc_full_scale = 30000;
    cfg
}

fn excerpt() -> Vec<f32> {
    let mut x = read_f32_le("cwru_ir007_1hp_de_excerpt.f32").expect("committed excerpt");
    // A few non-finite samples so the flagging path is split too.
    x[100] = f32::NAN;
    x[3001] = f32::INFINITY;
    x
}

fn run_f32(fe: &mut FrontEnd, x: &[f32], cuts: &[usize]) -> Vec<u32> {
    let mut out = Vec::new();
    let mut start = 0;
    for &c in cuts {
        let end = (start + c).min(x.len());
        fe.push_f32(&x[start..end], |v| out.push(v.to_bits()));
        start = end;
    }
    fe.push_f32(&x[start..], |v| out.push(v.to_bits()));
    out
}

fn run_i16(fe: &mut FrontEnd, x: &[i16], cuts: &[usize]) -> Vec<u32> {
    let mut out = Vec::new();
    let mut start = 0;
    for &c in cuts {
        let end = (start + c).min(x.len());
        fe.push_i16(&x[start..end], |v| out.push(v.to_bits()));
        start = end;
    }
    fe.push_i16(&x[start..], |v| out.push(v.to_bits()));
    out
}

fn overall_bits(fe: &FrontEnd) -> String {
    format!("{:?}", fe.overall())
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(48))]

    #[test]
    fn split_does_not_change_output(
        cuts in prop::collection::vec(0usize..700, 0..40),
        abs in any::<bool>(),
        dec in prop::sample::select(vec![1u16, 3, 8, 16]),
    ) {
        let x = excerpt();
        let mut whole = FrontEnd::new(&config(abs, dec)).unwrap();
        let want = run_f32(&mut whole, &x, &[]);
        let mut split = FrontEnd::new(&config(abs, dec)).unwrap();
        let got = run_f32(&mut split, &x, &cuts);
        prop_assert_eq!(got.len(), x.len() / usize::from(dec));
        prop_assert_eq!(&got, &want);
        prop_assert_eq!(overall_bits(&split), overall_bits(&whole));
        prop_assert_eq!(split.overall().non_finite, 2);

        // Same for ADC counts (with clipping), and after reset the run repeats exactly.
        let xi: Vec<i16> = x.iter().map(|&v| (if v.is_finite() { v } else { 0.0 } * 24000.0) as i16).collect();
        let mut whole_i = FrontEnd::new(&config(abs, dec)).unwrap();
        let want_i = run_i16(&mut whole_i, &xi, &[]);
        split.reset();
        let got_i = run_i16(&mut split, &xi, &cuts);
        prop_assert_eq!(&got_i, &want_i);
        prop_assert_eq!(overall_bits(&split), overall_bits(&whole_i));
        prop_assert!(split.overall().clipped > 0);
    }
}
