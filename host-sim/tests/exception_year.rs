//! Reports by exception over a simulated year with one growing defect.
//!
//! The fictional demo machine (host-sim/examples/demo-machine.toml) is
//! simulated once a day for 365 days while the outer-race defect of its
//! intermediate-shaft bearing grows (impact amplitude 0.02 g -> 0.8 g,
//! exponential); each record runs through the node's pipeline as the
//! firmware runs it (host_sim::analysis), becomes the full frame, and the
//! node's policy (wire::exception, default margin and period) decides
//! which frame goes out. Two gateway stores are fed: every cycle's full
//! frame, and what the policy sends. After every cycle the gateway's state
//! of every (bearing, defect) must be the same in both; the airtime of both
//! streams is printed (LoRa time on air, host_sim::energy::lora).
//!
//! Cost: 365 records of 16 s at 25.6 kS/s (the nRF52840 board's rate, long
//! enough for the point's input- and intermediate-shaft passes).
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation,
    clippy::cast_precision_loss,
    missing_docs
)]

use host_sim::analysis::{edges_from_channel, run, Accel, Record};
use host_sim::cmd_demo::{to_counts, DEMO_MACHINE, DEMO_POINT};
use host_sim::energy::lora::{time_on_air_s, LoraParams};
use host_sim::gateway::{store, trend, trend_cmd};
use host_sim::simulate::{simulate, MachineSpec};
use wire::exception::{Choice, ExceptionState, ReportPolicy};
use wire::frame::{decode, encode, encode_reduced, FrameReport};

const DAYS: u32 = 365;
const NODE: u16 = 7;
/// LoRaWAN framing around the application payload (MHDR, DevAddr, FCtrl,
/// FCnt, FPort, MIC: 13 bytes; LoRaWAN specification, common practice).
const MAC_OVERHEAD: usize = 13;

fn states(conn: &rusqlite::Connection) -> Vec<(u8, String, trend::State, Option<f64>)> {
    // the states `gateway status` prints (reduced frames read "as before")
    trend_cmd::grade_store(conn, "year", None)
        .unwrap()
        .into_iter()
        .map(|l| {
            (
                l.state.bearing,
                l.state.kind,
                l.state.state,
                l.state.baseline_g,
            )
        })
        .collect()
}

fn insert(conn: &mut rusqlite::Connection, bytes: &[u8], line: usize) {
    let frame = wire::frame::decode_any(bytes).unwrap();
    let tx = conn.transaction().unwrap();
    let origin = store::Origin {
        source: "year",
        line,
        rx_time: None,
    };
    assert!(store::insert_frame(&tx, &frame, bytes, &origin).unwrap());
    tx.commit().unwrap();
}

fn airtime_s(frames: &[Vec<u8>], sf: u8) -> f64 {
    let p = LoraParams::lorawan_uplink(sf, 125_000);
    frames
        .iter()
        .map(|f| time_on_air_s(&p, f.len() + MAC_OVERHEAD).unwrap())
        .sum()
}

#[test]
fn a_year_by_exception_gives_the_same_gateway_states_in_less_airtime() {
    let mut spec = MachineSpec::from_toml_str(DEMO_MACHINE).unwrap();
    spec.fs_hz = 25_600.0;
    spec.seconds = 16.0; // the point's first two passes (input and intermediate shafts)
    let defect = spec
        .bearings
        .iter()
        .position(|b| b.name == "inter-de")
        .unwrap();
    let mut point = host_sim::point::parse(DEMO_POINT).unwrap();
    point.revolutions = 128;
    point.sample_rate_hz = 25_600.0;

    let dir = tempfile::tempdir().unwrap();
    let path = |n: &str| dir.path().join(n).to_str().unwrap().to_string();
    let mut every = store::open(&path("every.sqlite")).unwrap();
    let mut by_exc = store::open(&path("exception.sqlite")).unwrap();

    let policy = ReportPolicy::default();
    let (mut differing, mut run_len) = (0u32, 0u16);
    let mut state = ExceptionState::new();
    let (mut full_frames, mut sent) = (Vec::new(), Vec::new());
    let mut reasons = std::collections::BTreeMap::new();
    let mut worst_states = Vec::new();
    for day in 0..DAYS {
        let growth = f64::from(day) / f64::from(DAYS - 1);
        spec.bearings[defect].impact_g = 0.02 * 40f64.powf(growth);
        let sim = simulate(&spec, u64::from(day) + 1).unwrap();
        let rec = Record {
            sample_rate_hz: 25_600.0,
            accel: Accel::Counts(to_counts(&sim.accel, point.counts_to_g)),
            edges_s: Some(edges_from_channel(&sim.tach, 25_600.0).unwrap()),
        };
        let report = run(&point, &rec).unwrap().report;
        let fr = FrameReport::from_report(&report, NODE, day as u16);
        let mut buf = [0u8; 256];
        let n = encode(&fr, &mut buf).unwrap();
        let full = buf[..n].to_vec();
        // the node decides on the values as the frame carries them
        let carried = decode(&full).unwrap();
        let choice = state.choose(&policy, &carried);
        let out = match choice {
            Choice::Full(r) => {
                *reasons.entry(format!("{r:?}")).or_insert(0) += 1;
                full.clone()
            }
            Choice::Reduced => {
                let mut b = [0u8; 256];
                let m = encode_reduced(&carried, &mut b).unwrap();
                b[..m].to_vec()
            }
        };
        state.sent(choice, &carried);
        insert(&mut every, &full, day as usize);
        insert(&mut by_exc, &out, day as usize);
        let (a, b) = (states(&every), states(&by_exc));
        // The states must agree but for short runs; the learned amplitude baselines may differ a
        // little (a reduced frame repeats the last full frame's amplitudes,
        // so the quiet reports the gateway learns from are not the same).
        let state_of = |v: &[(u8, String, trend::State, Option<f64>)]| {
            v.iter()
                .map(|s| (s.0, s.1.clone(), s.2))
                .collect::<Vec<_>>()
        };
        if state_of(&a) != state_of(&b) {
            differing += 1;
            run_len += 1;
        } else {
            run_len = 0;
        }
        // a finding that crosses a gateway level without moving by the
        // node's margin is seen at the next full frame at the latest
        assert!(
            run_len < policy.full_every,
            "day {day}: gateway states differ (full every cycle vs by exception, {choice:?})"
        );
        let inter = a
            .iter()
            .find(|s| s.0 == 1 && s.1.eq_ignore_ascii_case("bpfo"))
            .map(|s| s.2)
            .unwrap();
        if worst_states.last() != Some(&inter) {
            worst_states.push(inter);
            println!(
                "day {day:3}: inter-de BPFO {inter:?} (impact {:.3} g, {choice:?})",
                spec.bearings[defect].impact_g
            );
        }
        full_frames.push(full);
        sent.push(out);
    }
    println!("{differing} of {DAYS} cycles with another gateway state by exception (each run shorter than {} cycles)", policy.full_every);
    let reduced = sent.iter().filter(|f| f.len() == 11).count();
    println!(
        "{DAYS} cycles: {} full frames ({reasons:?}), {reduced} reduced",
        DAYS as usize - reduced
    );
    for sf in [7, 10, 12] {
        let (a, b) = (airtime_s(&full_frames, sf), airtime_s(&sent, sf));
        println!(
            "SF{sf}/125 kHz: airtime over the year {a:.2} s with full frames every cycle, {b:.2} s by exception: {:.1} % saved",
            (1.0 - b / a) * 100.0
        );
        assert!(b < a);
    }
    // the scenario is not trivial: the defect takes the gateway through
    // every state up to danger (back and forth near the limits, as scores
    // scatter from record to record) and ends in danger
    for st in [
        trend::State::Learning,
        trend::State::Normal,
        trend::State::Alert,
        trend::State::Danger,
    ] {
        assert!(
            worst_states.contains(&st),
            "{st:?} never reached: {worst_states:?}"
        );
    }
    assert_eq!(worst_states.last(), Some(&trend::State::Danger));
    assert!(
        reduced * 2 > DAYS as usize,
        "{reduced} reduced frames of {DAYS}"
    );
}
