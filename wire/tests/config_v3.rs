//! Configuration record version 3: parse/emit round trip, the layout of
//! docs/frame-format.md ("Configuration record"), every refusal with its
//! typed error, versions 1 and 2 still read, and the point -> record ->
//! point mapping (`wire::point`) both ways.
#![allow(
    clippy::unwrap_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation,
    missing_docs
)]

use dsp_core::config::{
    name_from, Bearing, BearingKinematics, DefectSearchConfig, MachineGroup, Mesh, PointConfig,
    Rectifier, Shaft, Support, Window,
};
use wire::config::{
    BearingModel, BearingSpec, ConfigError, MeshSpec, PointRecord, MAX_BEARINGS, MAX_MESHES,
    MAX_RECORD_LEN, MAX_SHAFTS,
};
use wire::crc::crc32;
use wire::point::{check_sendable, point_config, record_from_point, NodeSettings, RecordError};

fn encode(r: &PointRecord) -> Vec<u8> {
    let mut buf = [0u8; MAX_RECORD_LEN];
    let n = r.encode(&mut buf).unwrap();
    buf[..n].to_vec()
}

fn reseal(mut b: Vec<u8>) -> Vec<u8> {
    let n = b.len() - 4;
    let crc = crc32(&b[..n]);
    b[n..].copy_from_slice(&crc.to_le_bytes());
    b
}

const ORDERS: BearingModel = BearingModel::Orders {
    bpfo: 3.0530,
    bpfi: 4.9469,
    ftf: 0.3817,
    bsf: 1.9937,
};

/// A two-stage gearbox point: three shafts, a geometry and an orders
/// bearing, two meshes (one without a mate), custom search, every option
/// bit set.
fn gearbox() -> PointRecord {
    let mut r = PointRecord::default();
    r.samples_per_rev = 128;
    r.max_speed_change_pct = 25.0;
    r.rectifier = Rectifier::Square;
    r.window = Window::FlatTop;
    r.machine_group = MachineGroup::Large;
    r.support = Support::Flexible;
    r.shafts.push(1.0 / 3.2).unwrap();
    r.shafts.push(1.0 / 13.12).unwrap();
    r.bearings
        .push(BearingSpec {
            shaft: 2,
            model: ORDERS,
        })
        .unwrap();
    r.meshes
        .push(MeshSpec {
            shaft: 0,
            teeth: 23,
            mate: Some(1),
        })
        .unwrap();
    r.meshes
        .push(MeshSpec {
            shaft: 1,
            teeth: 20,
            mate: None,
        })
        .unwrap();
    let mut s = DefectSearchConfig::default();
    s.harmonics = 8;
    s.min_harmonics = 3;
    s.anchor_harmonics = 2;
    s.slip_tolerance = 0.015;
    s.prominence_threshold_db = 9.5;
    s.sideband_threshold_db = 7.0;
    s.mask_shaft_harmonics = false;
    r.search = s;
    r
}

#[test]
fn round_trip_and_layout_of_the_doc() {
    let r = gearbox();
    let b = encode(&r);
    // fixed 76, 3 shafts, search 28, geometry 14 + orders 17, 2 meshes, CRC
    assert_eq!(b.len(), 76 + 12 + 28 + 14 + 17 + 6 + 4);
    assert_eq!(b.len(), r.encoded_len());
    assert_eq!(&b[..3], b"EP\x03");
    assert_eq!(u16::from_le_bytes([b[3], b[4]]) as usize, b.len());
    assert_eq!(u32::from_le_bytes(b[5..9].try_into().unwrap()), 25_600);
    assert_eq!(b[61], 0); // band configured
    assert_eq!(u16::from_le_bytes([b[66], b[67]]), 128);
    assert_eq!(f32::from_le_bytes(b[68..72].try_into().unwrap()), 25.0);
    assert_eq!(b[72], 0b1_1111); // every option bit
    assert_eq!(&b[73..76], &[3, 2, 2]);
    assert_eq!(f32::from_le_bytes(b[76..80].try_into().unwrap()), 1.0);
    assert_eq!(&b[88..92], &[8, 3, 2, 0]); // search block
    assert_eq!(b[116], 0x01); // bearing 0: geometry on shaft 0
    assert_eq!(b[117], 9);
    assert_eq!(b[130], 0x20); // bearing 1: orders on shaft 2
    assert_eq!(&b[147..150], &[0x10, 23, 0]); // mesh 0: shaft 0, mate 1
    assert_eq!(&b[150..153], &[0xF1, 20, 0]); // mesh 1: shaft 1, no mate
    let crc = u32::from_le_bytes(b[b.len() - 4..].try_into().unwrap());
    assert_eq!(crc, crc32(&b[..b.len() - 4]));
    assert_eq!(PointRecord::decode(&b).unwrap(), r);
}

#[test]
fn the_default_search_is_not_written_and_the_largest_record_fits() {
    let r = PointRecord::default();
    assert_eq!(encode(&r).len(), 98);
    let mut big = gearbox();
    big.shafts.push(4.0).unwrap();
    big.bearings.clear();
    for i in 0..MAX_BEARINGS {
        big.bearings
            .push(BearingSpec {
                shaft: (i % MAX_SHAFTS) as u8,
                model: ORDERS,
            })
            .unwrap();
    }
    while big.meshes.len() < MAX_MESHES {
        big.meshes
            .push(MeshSpec {
                shaft: 3,
                teeth: 17,
                mate: Some(2),
            })
            .unwrap();
    }
    let b = encode(&big);
    assert_eq!(b.len(), MAX_RECORD_LEN);
    assert_eq!(MAX_RECORD_LEN, 272);
    assert_eq!(PointRecord::decode(&b).unwrap(), big);
}

#[test]
fn every_single_bit_flip_is_refused() {
    let b = encode(&gearbox());
    for i in 0..b.len() {
        for bit in 0..8 {
            let mut x = b.clone();
            x[i] ^= 1 << bit;
            assert!(PointRecord::decode(&x).is_err(), "byte {i} bit {bit}");
        }
    }
}

#[test]
fn malformed_records_are_refused_with_their_error() {
    let good = encode(&gearbox());
    for n in [0, 4, 60, good.len() - 1] {
        assert_eq!(
            PointRecord::decode(&good[..n]),
            Err(ConfigError::Truncated),
            "{n}"
        );
    }
    let mut b = good.clone();
    b[2] = 4;
    assert_eq!(
        PointRecord::decode(&b),
        Err(ConfigError::UnsupportedVersion(4))
    );
    let mut b = good.clone();
    b[2] = 0;
    assert_eq!(
        PointRecord::decode(&b),
        Err(ConfigError::UnsupportedVersion(0))
    );
    // a declared length shorter than the fixed part
    let mut b = good.clone();
    b[3] = 70;
    b[4] = 0;
    assert_eq!(PointRecord::decode(&b), Err(ConfigError::BadLength));
    // one bearing fewer than the bytes hold
    let mut b = good.clone();
    b[74] = 1;
    assert_eq!(PointRecord::decode(&reseal(b)), Err(ConfigError::BadLength));
    // one mesh more than the bytes hold
    let mut b = good.clone();
    b[75] = 3;
    assert_eq!(PointRecord::decode(&reseal(b)), Err(ConfigError::BadLength));
    let mut b = good.clone();
    b[100] ^= 1;
    assert_eq!(PointRecord::decode(&b), Err(ConfigError::BadCrc));
    let mut buf = [0u8; 40];
    assert_eq!(gearbox().encode(&mut buf), Err(ConfigError::BufferTooSmall));
}

/// Every v3 field outside its range, in the bytes (re-sealed, so only the
/// range check refuses), with the field it names.
#[test]
fn every_new_field_out_of_range_is_named() {
    let good = encode(&gearbox());
    let f = |x: f32| x.to_le_bytes();
    let cases: Vec<(usize, Vec<u8>, &str)> = vec![
        (66, 100u16.to_le_bytes().to_vec(), "samples_per_rev"),
        (66, 2048u16.to_le_bytes().to_vec(), "samples_per_rev"),
        (68, f(0.0).to_vec(), "max_speed_change_pct"),
        (68, f(f32::NAN).to_vec(), "max_speed_change_pct"),
        (72, vec![0x3F], "options"),
        (73, vec![0], "shafts"),
        (73, vec![5], "shafts"),
        (74, vec![9], "bearings"),
        (75, vec![5], "meshes"),
        (80, f(0.0).to_vec(), "shaft_ratio"),
        (80, f(f32::INFINITY).to_vec(), "shaft_ratio"),
        (88, vec![11], "search.harmonics"),
        (89, vec![9], "search.min_harmonics"),
        (90, vec![0], "search.anchor_harmonics"),
        (91, vec![2], "search.mask_shaft_harmonics"),
        (92, f(0.3).to_vec(), "search.slip_tolerance"),
        (96, f(0.1).to_vec(), "search.min_window_bins"),
        (100, f(-1.0).to_vec(), "search.prominence_db"),
        (104, f(0.0).to_vec(), "search.floor_band_orders"),
        (108, f(0.2).to_vec(), "search.refine_bins"),
        (112, f(f32::NAN).to_vec(), "search.sideband_db"),
        (116, vec![0x31], "bearing_shaft"), // shaft 3 of 3
        (116, vec![0x03], "bearing_kind"),
        (117, vec![0], "elements"),
        (122, f(-2.0).to_vec(), "pitch_mm"),
        (126, f(90.0).to_vec(), "contact_deg"),
        (130, vec![0x08], "bearing_kind"),
        (131, f(0.0).to_vec(), "defect_order"),
        (147, vec![0x13], "mesh_shaft"), // shaft 3 of 3
        (147, vec![0x11], "mesh_mate"),  // mate = its own shaft
        (147, vec![0x30], "mesh_mate"),  // mate 3 of 3
        (147, vec![0x14], "mesh_shaft"), // reserved bit
        (148, vec![0, 0], "mesh_teeth"),
    ];
    for (at, bytes, field) in cases {
        let mut b = good.clone();
        b[at..at + bytes.len()].copy_from_slice(&bytes);
        let got = PointRecord::decode(&reseal(b));
        // a changed count moves every later field: a length error is also
        // a refusal, but the count's own range comes first
        assert_eq!(got, Err(ConfigError::OutOfRange(field)), "byte {at}");
    }
    // a search block equal to the default is not canonical
    let mut r = gearbox();
    r.search = DefectSearchConfig::default();
    let mut b = encode(&r);
    assert_eq!(b[72] & 0x10, 0);
    b[72] |= 0x10;
    let mut block = vec![5, 2, 3, 1];
    for x in [0.02f32, 1.5, 10.0, 0.5, 1.5, 8.0] {
        block.extend(x.to_le_bytes());
    }
    let at = 76 + 12;
    b.splice(at..at, block);
    let len = b.len() as u16;
    b[3..5].copy_from_slice(&len.to_le_bytes());
    assert_eq!(
        PointRecord::decode(&reseal(b)),
        Err(ConfigError::OutOfRange("options"))
    );
}

fn v2_record(bearings: &[(f32, BearingModel)]) -> Vec<u8> {
    // The version 2 layout (docs/frame-format.md), written out by hand.
    let r = PointRecord::default();
    let mut b = b"EP\x02\x00".to_vec();
    b.extend(r.sample_rate_hz.to_le_bytes());
    b.extend(r.band_lo_hz.to_le_bytes());
    b.extend(r.band_hi_hz.to_le_bytes());
    b.extend([r.poles, r.pulses_per_rev]);
    b.extend(r.record_revs.to_le_bytes());
    b.extend(r.speed_min_rpm.to_le_bytes());
    b.extend(r.speed_max_rpm.to_le_bytes());
    b.extend(r.tach_tick_hz.to_le_bytes());
    b.extend(r.settle_ms.to_le_bytes());
    b.extend(r.interval_s.to_le_bytes());
    b.extend(r.health.flat_counts.to_le_bytes());
    b.extend(r.health.clip_level.to_le_bytes());
    b.extend(r.health.clip_permille.to_le_bytes());
    b.extend(r.health.saturated_permille.to_le_bytes());
    b.extend(r.low_battery_mv.to_le_bytes());
    b.extend(r.alert_db.to_le_bytes());
    b.extend(r.danger_db.to_le_bytes());
    b.extend(r.counts_to_g.to_le_bytes());
    b.extend([bearings.len() as u8, 0]);
    b.extend(0.0f32.to_le_bytes());
    assert_eq!(b.len(), 66);
    for (ratio, m) in bearings {
        let (kind, el, v) = match *m {
            BearingModel::Orders {
                bpfo,
                bpfi,
                ftf,
                bsf,
            } => (0u8, 0u8, [bpfo, bpfi, ftf, bsf]),
            BearingModel::Geometry {
                elements,
                element_mm,
                pitch_mm,
                contact_deg,
            } => (1, elements, [element_mm, pitch_mm, contact_deg, 0.0]),
        };
        b.extend([kind, el]);
        b.extend(ratio.to_le_bytes());
        for x in v {
            b.extend(x.to_le_bytes());
        }
    }
    b[3] = (b.len() + 4) as u8;
    let crc = crc32(&b);
    b.extend(crc.to_le_bytes());
    b
}

#[test]
fn version_2_records_still_parse_with_their_ratios_as_shafts() {
    let geo = PointRecord::default().bearings[0].model;
    let b = v2_record(&[(1.0, geo), (0.25, ORDERS), (0.25, geo), (3.0, ORDERS)]);
    let r = PointRecord::decode(&b).unwrap();
    assert_eq!(r.shafts.as_slice(), &[1.0, 0.25, 3.0]);
    let on: Vec<u8> = r.bearings.iter().map(|b| b.shaft).collect();
    assert_eq!(on, [0, 1, 1, 2]);
    // what v2 could not say is what the node used before v3
    assert_eq!(r.samples_per_rev, 64);
    assert_eq!(r.rectifier, Rectifier::Abs);
    assert!(r.meshes.is_empty());
    assert_eq!(r.search, DefectSearchConfig::default());
    // and it is written back as version 3
    let v3 = encode(&r);
    assert_eq!(v3[2], 3);
    assert_eq!(PointRecord::decode(&v3).unwrap(), r);
    // five distinct ratios (tach + 4) do not fit a dsp-core point
    let b = v2_record(&[(0.5, ORDERS), (2.0, ORDERS), (3.0, ORDERS), (4.0, ORDERS)]);
    assert_eq!(
        PointRecord::decode(&b),
        Err(ConfigError::OutOfRange("shafts"))
    );
    // a v2 length that does not match its bearing count
    let mut b = v2_record(&[(1.0, geo)]);
    b[60] = 2;
    assert_eq!(PointRecord::decode(&reseal(b)), Err(ConfigError::BadLength));
}

fn gearbox_point() -> PointConfig {
    let mut p = PointConfig::default();
    p.sample_rate_hz = 25_600.0;
    p.band_hz = Some([2_000.0, 8_000.0]);
    p.min_rpm = 1_200.0;
    p.max_rpm = 1_600.0;
    p.samples_per_rev = 128;
    p.revolutions = 256;
    p.rectifier = Rectifier::Square;
    p.window = Window::FlatTop;
    p.search.harmonics = 6;
    p.search.sideband_threshold_db = 7.5;
    p.shafts.clear();
    for (n, r) in [
        ("input", 1.0),
        ("inter", 1.0 / 3.2),
        ("output", 1.0 / 13.12),
    ] {
        p.shafts
            .push(Shaft {
                name: name_from(n),
                ratio: r,
            })
            .unwrap();
    }
    for (n, shaft) in [("in-de", 0u8), ("int-de", 1), ("out-de", 2)] {
        p.bearings
            .push(Bearing {
                name: name_from(n),
                shaft,
                kinematics: BearingKinematics::Geometry {
                    rollers: 9,
                    roller_diameter: 7.94,
                    pitch_diameter: 39.04,
                    contact_angle_deg: 0.0,
                },
            })
            .unwrap();
    }
    p.meshes
        .push(Mesh {
            name: name_from("stage-1"),
            shaft: 0,
            teeth: 23,
            mate: Some(1),
        })
        .unwrap();
    p.validate().unwrap();
    p
}

#[test]
fn a_point_becomes_a_record_and_the_node_reads_back_the_same_point() {
    let p = gearbox_point();
    let r = record_from_point(&p, &NodeSettings::default()).unwrap();
    let back = point_config(&PointRecord::decode(&encode(&r)).unwrap()).unwrap();
    // names are not carried: the node names by place
    assert_eq!(back.bearings[2].name.as_str(), "bearing2");
    assert_eq!(back.meshes[0].name.as_str(), "mesh0");
    let mut named = back.clone();
    for (x, y) in named.shafts.iter_mut().zip(&p.shafts) {
        x.name = y.name.clone();
    }
    for (x, y) in named.bearings.iter_mut().zip(&p.bearings) {
        x.name = y.name.clone();
    }
    for (x, y) in named.meshes.iter_mut().zip(&p.meshes) {
        x.name = y.name.clone();
    }
    assert_eq!(named, p);
    assert_eq!(check_sendable(&p), Ok(()));
}

#[test]
fn a_point_outside_the_record_is_refused_naming_the_key() {
    let base = gearbox_point();
    type Case = (fn(&mut PointConfig), &'static str);
    let cases: [Case; 6] = [
        (|p| p.sample_rate_hz = 25_600.5, "sensor.sample_rate_hz"),
        (
            |p| {
                p.speed = dsp_core::config::SpeedInput::Tach {
                    pulses_per_rev: 1,
                    tick_hz: 500,
                    tick_at_sample0: 0,
                }
            },
            "speed.tick_hz",
        ),
        (|p| p.band_hz = Some([0.5, 8_000.0]), "envelope.band_hz"),
        (|p| p.counts_to_g = 5_000.0, "sensor.counts_to_g"),
        (|p| p.shafts[2].ratio = 1e-5, "shaft.ratio"),
        (
            |p| {
                p.bearings[0].kinematics = BearingKinematics::Geometry {
                    rollers: 300,
                    roller_diameter: 1.0,
                    pitch_diameter: 400.0,
                    contact_angle_deg: 0.0,
                }
            },
            "rollers",
        ),
    ];
    for (change, key) in cases {
        let mut p = base.clone();
        change(&mut p);
        let e = check_sendable(&p).unwrap_err();
        assert!(e.to_string().contains(key), "{key}: {e}");
    }
    // a constant-speed point is checked as if the node's tach measured it
    let mut p = base.clone();
    p.speed = dsp_core::config::SpeedInput::Constant { rpm: 1_480.0 };
    assert_eq!(check_sendable(&p), Ok(()));
    // but the downlink itself needs the tach
    assert!(matches!(
        record_from_point(&p, &NodeSettings::default()),
        Err(RecordError::Unsupported {
            key: "speed.source",
            ..
        })
    ));
}
