//! The worked example of docs/frame-format.md is the encoder's output: the
//! hex and the decoded JSON in the document must equal what the code gives.
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::panic,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation
)]

#[path = "frame_common/mod.rs"]
mod common;

use wire::frame::{
    decode, encode, encode_reduced, BearingResult, DefectResult, FrameFlags, FrameReport, IsoZone,
};

/// The example of the document (an invented node on an invented gearbox).
fn example() -> FrameReport {
    let d = |s: f32, a: f32, h: u8, det: bool| DefectResult {
        score_db: s,
        amplitude_1x_g: a,
        harmonics: h,
        detected: det,
        line: None,
    };
    let mut r = FrameReport {
        node_id: 0x0A17,
        seq: 513,
        flags: FrameFlags {
            low_battery: true,
            ..FrameFlags::default()
        },
        speed_rpm: 1487.3,
        ..FrameReport::default()
    };
    r.overall.accel_rms_g = 0.734;
    r.overall.peak_g = 4.87;
    r.overall.crest_factor = 6.63;
    r.overall.kurtosis = 5.2;
    r.overall.velocity_rms_mm_s = 3.41;
    r.overall.iso_zone = Some(IsoZone::B);
    let bearings = [
        [
            d(17.6, 0.0213, 5, true),
            d(3.2, 0.0011, 1, false),
            d(0.4, 0.0004, 0, false),
            d(2.1, 0.0009, 0, false),
        ],
        [
            d(4.9, 0.0018, 1, false),
            d(1.0, 0.0006, 0, false),
            d(f32::NAN, f32::NAN, 0, false),
            d(-2.0, 0.0, 0, false),
        ],
        [
            d(2.5, 0.0010, 0, false),
            d(7.7, 0.0031, 2, false),
            d(0.0, 0.0002, 0, false),
            d(80.0, 30.0, 10, true),
        ],
    ];
    for b in bearings {
        r.bearings.push(BearingResult { defects: b }).unwrap();
    }
    r
}

/// Text of the first ``` block after `marker` in the document.
fn block_after<'a>(doc: &'a str, marker: &str) -> &'a str {
    let start = doc
        .find(marker)
        .unwrap_or_else(|| panic!("marker {marker} missing"));
    let rest = &doc[start..];
    let open = rest.find("```").unwrap();
    let body = &rest[open + 3..];
    let body = &body[body.find('\n').unwrap() + 1..];
    &body[..body.find("```").unwrap()]
}

fn doc() -> String {
    std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../docs/frame-format.md"
    ))
    .unwrap()
}

fn squash(s: &str) -> String {
    s.split_whitespace().collect()
}

#[test]
fn doc_example_hex_is_encoder_output() {
    let mut buf = [0u8; 64];
    let n = encode(&example(), &mut buf).unwrap();
    let hex = common::to_hex(&buf[..n]);
    println!("full: {hex}");
    assert_eq!(
        squash(block_after(&doc(), "<!-- example-full-hex -->")),
        hex
    );
    let m = encode_reduced(&example(), &mut buf).unwrap();
    let rhex = common::to_hex(&buf[..m]);
    println!("reduced: {rhex}");
    assert_eq!(
        squash(block_after(&doc(), "<!-- example-reduced-hex -->")),
        rhex
    );
}

#[test]
fn doc_example_decoded_json_is_decoder_output() {
    let mut buf = [0u8; 64];
    let n = encode(&example(), &mut buf).unwrap();
    let back = decode(&buf[..n]).unwrap();
    let json = serde_json::to_string_pretty(&back).unwrap();
    println!("{json}");
    assert_eq!(
        squash(block_after(&doc(), "<!-- example-decoded-json -->")),
        squash(&json)
    );
}

/// The status-frame example of the document: node 0x0A17 after a refused
/// downlink, its band chosen by its survey.
#[test]
fn doc_status_example_hex_is_encoder_output() {
    use wire::frame::status::{
        encode_status, BandSource, BootConfig, DownlinkResult, StatusReport, SurveyStatus,
    };
    let r = StatusReport {
        node_id: 0x0A17,
        seq: 2,
        band_source: BandSource::Survey,
        boot_config: BootConfig::Stored,
        provisioned: true,
        downlink_counter: 41,
        last_downlink: DownlinkResult::BadTag,
        refused_downlinks: 1,
        survey: SurveyStatus::Stored,
        band_hz: [2519.842, 5039.684],
        band_kurtosis: 7.31,
        ..StatusReport::default()
    };
    let mut buf = [0u8; 64];
    let n = encode_status(&r, &mut buf).unwrap();
    let hex = common::to_hex(&buf[..n]);
    println!("status: {hex}");
    assert_eq!(
        squash(block_after(&doc(), "<!-- example-status-hex -->")),
        hex
    );
}

/// The version 2 example of the document: the same node on an invented
/// two-stage gearbox, bearing 0 (input shaft) with an outer-race finding,
/// bearing 1 (output shaft) not searched by this setting, one mesh.
fn example_v2() -> FrameReport {
    use wire::frame::layout::FORMAT_VERSION_2;
    use wire::frame::{LineDetail, LineState, MeshResult, NotSearchedCode};
    let searched =
        |score: f32, found: u8, det: bool, amp: f32, of: u8, sb: u8, margin: f32| DefectResult {
            score_db: score,
            amplitude_1x_g: f32::NAN,
            harmonics: found,
            detected: det,
            line: Some(LineDetail {
                state: if det {
                    LineState::Detected
                } else {
                    LineState::Searched
                },
                amplitude_g: amp,
                harmonics_searched: of,
                sidebands: sb,
                margin_db: margin,
                ..LineDetail::default()
            }),
        };
    let not = |reason: NotSearchedCode, needed: Option<u16>| DefectResult {
        score_db: f32::NAN,
        amplitude_1x_g: f32::NAN,
        harmonics: 0,
        detected: false,
        line: Some(LineDetail {
            state: LineState::NotSearched,
            reason: Some(reason),
            needed_samples_per_rev: needed,
            amplitude_g: f32::NAN,
            margin_db: f32::NAN,
            ..LineDetail::default()
        }),
    };
    let mut r = example();
    r.version = FORMAT_VERSION_2;
    r.bearings.clear();
    let b0 = [
        searched(17.6, 4, true, 0.0412, 5, 0, 16.3),
        searched(3.2, 1, false, 0.0011, 5, 0, 10.8),
        searched(0.0, 0, false, 0.0, 2, 0, f32::NAN),
        not(NotSearchedCode::NoHarmonic, None),
    ];
    let b1 = [not(NotSearchedCode::TooManyPasses, Some(16)); 4];
    r.bearings.push(BearingResult { defects: b0 }).unwrap();
    r.bearings.push(BearingResult { defects: b1 }).unwrap();
    r.meshes
        .push(MeshResult {
            searched: true,
            amplitude_g: 0.0213,
            prominence_db: 21.4,
            sideband_gear_g: 0.0034,
            sideband_mate_g: f32::NAN,
        })
        .unwrap();
    r
}

#[test]
fn doc_v2_example_is_codec_output() {
    let mut buf = [0u8; 256];
    let n = encode(&example_v2(), &mut buf).unwrap();
    assert_eq!(n, 61);
    let hex = common::to_hex(&buf[..n]);
    println!("v2 full: {hex}");
    assert_eq!(
        squash(block_after(&doc(), "<!-- example-v2-full-hex -->")),
        hex
    );
    let m = encode_reduced(&example_v2(), &mut buf).unwrap();
    let rhex = common::to_hex(&buf[..m]);
    println!("v2 reduced: {rhex}");
    assert_eq!(
        squash(block_after(&doc(), "<!-- example-v2-reduced-hex -->")),
        rhex
    );
    let back = decode(&common::from_hex(&hex)).unwrap();
    let json = serde_json::to_string_pretty(&back).unwrap();
    println!("{json}");
    assert_eq!(
        squash(block_after(&doc(), "<!-- example-v2-decoded-json -->")),
        squash(&json)
    );
}
