// Shared helpers of the gateway tests (included with `#[path]`).
#![allow(dead_code)]
use std::path::Path;
use std::process::{Command, Output};
use wire::frame::{encode, encode_reduced, BearingResult, DefectResult, FrameReport};

pub const BIN: &str = env!("CARGO_BIN_EXE_envord");

/// A full frame of an invented node: bearing 0 BPFO score `bpfo_db`, others quiet.
pub fn frame(node: u16, seq: u16, bpfo_db: f32, detected: bool) -> Vec<u8> {
    let mut r = FrameReport {
        node_id: node,
        seq,
        speed_rpm: 1200.0,
        ..FrameReport::default()
    };
    for b in 0..2 {
        let mut br = BearingResult::default();
        for (k, d) in br.defects.iter_mut().enumerate() {
            *d = DefectResult {
                score_db: 3.0 + k as f32,
                amplitude_1x_g: 0.001,
                harmonics: 1,
                detected: false,
            };
        }
        if b == 0 {
            br.defects[0] = DefectResult {
                score_db: bpfo_db,
                amplitude_1x_g: 0.01,
                harmonics: 4,
                detected,
            };
        }
        r.bearings.push(br).unwrap();
    }
    let mut buf = [0u8; 64];
    let n = encode(&r, &mut buf).unwrap();
    buf[..n].to_vec()
}

pub fn reduced(node: u16, seq: u16, bpfo_db: f32) -> Vec<u8> {
    let full = wire::frame::decode(&frame(node, seq, bpfo_db, true)).unwrap();
    let mut buf = [0u8; 11];
    encode_reduced(&full, &mut buf).unwrap();
    buf.to_vec()
}

/// A status frame of an invented node after a refused downlink.
pub fn status(node: u16, seq: u16, counter: u32, refused: u8) -> Vec<u8> {
    use wire::frame::status::{
        encode_status, BandSource, DownlinkResult, StatusReport, SurveyStatus,
    };
    let r = StatusReport {
        node_id: node,
        seq,
        provisioned: true,
        downlink_counter: counter,
        last_downlink: if refused > 0 {
            DownlinkResult::BadTag
        } else {
            DownlinkResult::ConfigApplied
        },
        refused_downlinks: refused,
        survey: SurveyStatus::Stored,
        band_source: BandSource::Survey,
        band_hz: [2519.842, 5039.684],
        band_kurtosis: 6.5,
        ..StatusReport::default()
    };
    let mut buf = [0u8; 32];
    let n = encode_status(&r, &mut buf).unwrap();
    buf[..n].to_vec()
}

pub fn hex(b: &[u8]) -> String {
    b.iter().map(|x| format!("{x:02x}")).collect()
}

pub fn run(args: &[&str], cwd: &Path) -> Output {
    Command::new(BIN)
        .args(args)
        .current_dir(cwd)
        .output()
        .unwrap()
}

pub fn stdout(o: &Output) -> String {
    String::from_utf8_lossy(&o.stdout).into_owned()
}

pub fn db_count(db: &Path, table: &str) -> i64 {
    let c = rusqlite::Connection::open(db).unwrap();
    c.query_row(&format!("SELECT COUNT(*) FROM {table}"), [], |r| r.get(0))
        .unwrap()
}

/// A full frame of an invented node: bearing 0 BPFO with 1x amplitude
/// `bpfo_g` (score 20 dB when detected, else 0), the other lines quiet.
pub fn frame_amp(node: u16, seq: u16, bpfo_g: f32, detected: bool) -> Vec<u8> {
    let mut f = wire::frame::decode(&frame(node, seq, 0.0, false)).unwrap();
    f.bearings[0].defects[0] = DefectResult {
        score_db: if detected { 20.0 } else { 0.0 },
        amplitude_1x_g: bpfo_g,
        harmonics: if detected { 4 } else { 0 },
        detected,
    };
    let mut buf = [0u8; 64];
    let n = encode(&f, &mut buf).unwrap();
    buf[..n].to_vec()
}
