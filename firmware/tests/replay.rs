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

use firmware::cycle::{Devices, Node};
use firmware::hal::*;
use firmware::overall_core::OverallCore;
use std::cell::Cell;
use std::path::PathBuf;
use std::rc::Rc;

const BLOCK: usize = 256;

fn input(name: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("../boards/qemu-mps2/input")
        .join(name)
}

/// Same delivery rule as the QEMU board: blocks in order, each edge released
/// once the sample clock has passed it.
struct Src {
    samples: Vec<i16>,
    pos: usize,
    clock: Rc<Cell<u32>>,
}
impl BlockSource for Src {
    type Error = ();
    fn block_len(&self) -> usize {
        BLOCK
    }
    fn start(&mut self) -> Result<(), ()> {
        Ok(())
    }
    fn next_block(&mut self) -> Result<Block<'_>, ()> {
        let b = self.samples.get(self.pos..self.pos + BLOCK).ok_or(())?;
        self.pos += BLOCK;
        self.clock.set(self.pos as u32);
        Ok(Block {
            samples: b,
            overrun: false,
        })
    }
    fn stop(&mut self) {}
}
struct Cap {
    edges: std::collections::VecDeque<u32>,
    clock: Rc<Cell<u32>>,
}
impl PulseCapture for Cap {
    type Error = ();
    fn start(&mut self) -> Result<(), ()> {
        Ok(())
    }
    fn next_edge(&mut self) -> Option<u32> {
        let e = *self.edges.front()?;
        (e < self.clock.get()).then(|| self.edges.pop_front().unwrap())
    }
    fn stop(&mut self) {}
}
struct Radio(Vec<u8>);
impl RadioLink for Radio {
    type Error = ();
    fn send(&mut self, f: &[u8]) -> Result<(), ()> {
        self.0.extend_from_slice(f);
        Ok(())
    }
    fn receive(&mut self, _b: &mut [u8]) -> Result<Option<usize>, ()> {
        Ok(None)
    }
}
struct NoSleep;
impl Alarm for NoSleep {
    fn sleep(&mut self, _s: u32) -> WakeReason {
        WakeReason::Schedule
    }
}
struct Store(Vec<u8>);
impl Storage for Store {
    type Error = ();
    fn load(&mut self, slot: Slot, buf: &mut [u8]) -> Result<usize, ()> {
        if slot != Slot::Config {
            return Ok(0);
        }
        buf[..self.0.len()].copy_from_slice(&self.0);
        Ok(self.0.len())
    }
    fn store(&mut self, _s: Slot, _d: &[u8]) -> Result<(), ()> {
        Ok(())
    }
}
struct Batt;
impl Battery for Batt {
    fn millivolts(&mut self) -> u16 {
        3300
    }
}
struct Dog;
impl Watchdog for Dog {
    fn feed(&mut self) {}
}
struct Pin;
impl embedded_hal::digital::ErrorType for Pin {
    type Error = core::convert::Infallible;
}
impl embedded_hal::digital::OutputPin for Pin {
    fn set_low(&mut self) -> Result<(), Self::Error> {
        Ok(())
    }
    fn set_high(&mut self) -> Result<(), Self::Error> {
        Ok(())
    }
}
struct NoDelay;
impl embedded_hal::delay::DelayNs for NoDelay {
    fn delay_ns(&mut self, _ns: u32) {}
}

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
    let raw = std::fs::read(input("recording.i16")).unwrap();
    let samples: Vec<i16> = raw
        .chunks_exact(2)
        .map(|b| i16::from_le_bytes([b[0], b[1]]))
        .collect();
    let tach = std::fs::read(input("tach.u32")).unwrap();
    let edges = tach
        .chunks_exact(4)
        .map(|b| u32::from_le_bytes([b[0], b[1], b[2], b[3]]))
        .collect();
    let clock = Rc::new(Cell::new(0));
    let dev = Devices {
        source: Src {
            samples,
            pos: 0,
            clock: clock.clone(),
        },
        capture: Cap { edges, clock },
        radio: Radio(Vec::new()),
        alarm: NoSleep,
        storage: Store(std::fs::read(input("config.bin")).unwrap()),
        battery: Batt,
        watchdog: Dog,
        power: Pin,
        delay: NoDelay,
    };
    let mut node = Node::new(dev, OverallCore::new());
    assert_eq!(node.config_source(), firmware::cycle::ConfigSource::Stored);
    let per = node.blocks_wanted() as usize * BLOCK;
    while node.devices().source.samples.len() - node.devices().source.pos >= per {
        node.run_cycle().unwrap();
    }
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
    assert_eq!(got.len(), 12 * expected.len());
    for (g, e) in got.chunks(12).zip(&expected) {
        // flags exact; rounded fields within one unit (f32 here vs f64 in numpy)
        for (a, b) in fields(g).iter().zip(fields(e).iter()) {
            assert!(a.abs_diff(*b) <= 1, "frame {g:02x?} vs numpy {e:02x?}");
        }
        assert_eq!(g[0], 0x4F);
    }
}
