//! `envord gateway import` of report frames version 2 next to version 1:
//! the v3 defect columns (`searched`, `amplitude_g`, `harmonics_searched`,
//! `sidebands`, `margin_db`) come from the v2 frame, NULL for v1 (the frame
//! layout is docs/frame-format.md; the frame below is its worked example).
#![allow(clippy::unwrap_used, clippy::indexing_slicing)]

#[path = "gateway_common/mod.rs"]
mod common;

use common::*;

/// docs/frame-format.md, "Worked example, version 2".
const V2_EXAMPLE: &str = "200a170201004022173d02de01e742150155019292451004353150a04000023e00500003e00404003e00404003e00404003e00404003e0558666fffa61";

type Row = (
    i64,
    String,
    i64,
    Option<f64>,
    Option<i64>,
    Option<i64>,
    Option<f64>,
    bool,
);

#[test]
fn v2_frames_fill_the_v3_columns_v1_frames_leave_them_null() {
    let dir = tempfile::tempdir().unwrap();
    let lines = [hex(&frame(1, 1, 20.0, true)), V2_EXAMPLE.to_string()];
    std::fs::write(dir.path().join("in.txt"), lines.join("\n") + "\n").unwrap();
    let o = run(
        &["gateway", "import", "--db", "gw.sqlite", "in.txt"],
        dir.path(),
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(
        stdout(&o).contains("imported 2 new frame(s)"),
        "{}",
        stdout(&o)
    );
    let c = rusqlite::Connection::open(dir.path().join("gw.sqlite")).unwrap();
    let rows = |node: i64| -> Vec<Row> {
        let mut st = c
            .prepare(
                "SELECT d.bearing, d.kind, d.searched, d.amplitude_g, d.harmonics_searched,
                        d.sidebands, d.margin_db, d.detected
                 FROM defects d JOIN reports r ON r.id = d.report_id
                 WHERE r.node_id = ?1 ORDER BY d.bearing, d.rowid",
            )
            .unwrap();
        st.query_map([node], |r| {
            Ok((
                r.get(0)?,
                r.get(1)?,
                r.get(2)?,
                r.get(3)?,
                r.get(4)?,
                r.get(5)?,
                r.get(6)?,
                r.get(7)?,
            ))
        })
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap()
    };
    // v1: searched 1 (as before schema v3), the rest NULL.
    let v1 = rows(1);
    assert_eq!(v1.len(), 8);
    for r in &v1 {
        assert_eq!(
            (r.2, r.3, r.4, r.5, r.6),
            (1, None, None, None, None),
            "{r:?}"
        );
    }
    // v2 (node 0x0A17): bearing 0 BPFO detected, 0.0412 g within the
    // 0.25 dB of the log code, 5 searched, margin 16 dB (2 dB steps).
    let v2 = rows(0x0A17);
    assert_eq!(v2.len(), 8);
    let bpfo = &v2[0];
    assert_eq!((bpfo.0, bpfo.1.as_str(), bpfo.2), (0, "BPFO", 1));
    let a = bpfo.3.unwrap();
    assert!((20.0 * (a / 0.0412).log10()).abs() <= 0.25, "{a}");
    assert_eq!(
        (bpfo.4, bpfo.5, bpfo.6, bpfo.7),
        (Some(5), Some(0), Some(16.0), true)
    );
    // FTF searched, nothing counted: amplitude 0, margin NULL.
    assert_eq!(
        (v2[2].2, v2[2].3, v2[2].4, v2[2].6),
        (1, Some(0.0), Some(2), None)
    );
    // BSF of bearing 0 and every line of bearing 1: not searched, never a
    // healthy zero.
    assert_eq!((v2[3].0, v2[3].1.as_str()), (0, "BSF"));
    for r in &v2[3..] {
        assert_eq!(
            (r.2, r.3, r.4, r.6, r.7),
            (0, None, Some(0), None, false),
            "{r:?}"
        );
    }
}
