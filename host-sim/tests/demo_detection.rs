//! `envord demo`: the simulated CV-7 reducer (fictional) carries one
//! outer-race defect, on the intermediate-shaft bearing `inter-de`
//! (host-sim/examples/demo-machine.toml). The node's analysis of it must
//! report exactly that: BPFO on inter-de detected and the strongest score
//! of that bearing, and no other detection on any bearing.
//!
//! Outside reference: an outer-race defect shows as BPFO and its harmonics
//! in the envelope spectrum, and nothing at BPFI, FTF or 2 x BSF (Randall &
//! Antoni, "Rolling element bearing diagnostics - a tutorial", MSSP 25
//! (2011), section 2; from memory).
#![allow(clippy::unwrap_used, clippy::indexing_slicing, clippy::panic)]

use dsp_core::diagnosis::kinematics::DefectKind;
use host_sim::cmd_demo::{demo_analysis, DEMO_SEED};

#[test]
fn demo_defect_detected_and_nothing_else() {
    let a = demo_analysis(DEMO_SEED).unwrap();
    let r = &a.report;
    assert!(r.analysed(), "demo record not analysed: {}", r.flags);
    assert_eq!(r.bearings.len(), 3);
    let mut detections = Vec::new();
    for b in &r.bearings {
        let d = b.diagnosis.as_ref().unwrap();
        for k in DefectKind::ALL {
            let x = d.get(k).unwrap();
            println!(
                "{:<10} {:<4} score {:6.2} dB detected {}",
                b.name.as_str(),
                k.name(),
                x.score_db,
                x.detected
            );
            if x.detected {
                detections.push((b.name.as_str().to_string(), k));
            }
        }
    }
    assert_eq!(
        detections,
        vec![("inter-de".to_string(), DefectKind::Bpfo)],
        "the demo's only defect is the outer race of inter-de"
    );
    let inter = r
        .bearings
        .iter()
        .find(|b| b.name.as_str() == "inter-de")
        .unwrap();
    let d = inter.diagnosis.as_ref().unwrap();
    let bpfo = d.get(DefectKind::Bpfo).unwrap().score_db;
    for k in [DefectKind::Bpfi, DefectKind::Ftf, DefectKind::Bsf] {
        assert!(
            d.get(k).unwrap().score_db < bpfo,
            "{k:?} outscores BPFO on inter-de"
        );
    }
}
