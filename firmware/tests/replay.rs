//! Host replay of the committed QEMU input (boards/qemu-mps2/input): the same
//! firmware and overall core on the host must give the frames that an
//! independent numpy computation gives (reference_frames.py, committed as
//! expected_frames.txt). With ENVORD_HOST_FRAMES_OUT set, the frames are also
//! written there so boards/ci.sh can compare them byte for byte with QEMU's.
#![allow(
    clippy::unwrap_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation,
    missing_docs
)]

mod replay_common;
use firmware::overall_core::OverallCore;
use replay_common::{input, replay, split_frames};

fn fields(f: &[u8]) -> [u32; 5] {
    let u16le = |i: usize| u32::from(u16::from_le_bytes([f[i], f[i + 1]]));
    [
        u32::from(f[1]),
        u16le(2),
        u16le(4),
        u16le(6),
        u32::from_le_bytes([f[8], f[9], f[10], f[11]]),
    ]
}

#[test]
fn replay_matches_numpy_reference() {
    let node = replay(OverallCore::new());
    let got = node.devices().radio.0.clone();
    if let Some(out) = std::env::var_os("ENVORD_HOST_FRAMES_OUT") {
        std::fs::write(out, &got).unwrap();
    }
    let expected: Vec<Vec<u8>> = std::fs::read_to_string(input("expected_frames.txt"))
        .unwrap()
        .lines()
        .map(|l| {
            (0..l.len())
                .step_by(2)
                .map(|i| u8::from_str_radix(&l[i..i + 2], 16).unwrap())
                .collect()
        })
        .collect();
    assert_eq!(expected.len(), 2);
    // report, status (first cycle after boot), report
    let frames = split_frames(&got);
    assert_eq!(
        frames.iter().map(Vec::len).collect::<Vec<_>>(),
        [12, 27, 12]
    );
    let status = wire::frame::status::decode_status(&frames[1]).unwrap();
    assert_eq!((status.node_id, status.downlink_counter), (1, 0));
    assert_eq!(status.band_hz, [2000.0, 8000.0]);
    let reports: Vec<&Vec<u8>> = frames.iter().filter(|f| f.len() == 12).collect();
    for (g, e) in reports.into_iter().zip(&expected) {
        // flags exact; rounded fields within one unit (f32 here vs f64 in numpy)
        for (a, b) in fields(g).iter().zip(fields(e).iter()) {
            assert!(a.abs_diff(*b) <= 1, "frame {g:02x?} vs numpy {e:02x?}");
        }
        assert_eq!(g[0], 0x4F);
    }
}
