//! Host replay harness: the committed QEMU input through a node with the
//! same delivery rules as the qemu-mps2 board.
#![allow(
    clippy::panic,
    dead_code,
    clippy::unwrap_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation,
    missing_docs
)]

use firmware::cycle::{Devices, Node};
use firmware::hal::*;

use std::cell::Cell;
use std::path::PathBuf;
use std::rc::Rc;

pub const BLOCK: usize = 256;

pub fn input(name: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("../boards/qemu-mps2/input")
        .join(name)
}

/// Same delivery rule as the QEMU board: blocks in order, each edge released
/// once the sample clock has passed it.
pub struct Src {
    pub samples: Vec<i16>,
    pub pos: usize,
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
pub struct Cap {
    edges: std::collections::VecDeque<u32>,
    clock: Rc<Cell<u32>>,
    origin: u32,
}
impl PulseCapture for Cap {
    type Error = ();
    fn start(&mut self) -> Result<(), ()> {
        // ticks count from the first sample of this record
        self.origin = self.clock.get();
        while self.edges.front().is_some_and(|&e| e < self.origin) {
            self.edges.pop_front();
        }
        Ok(())
    }
    fn next_edge(&mut self) -> Option<u32> {
        let e = *self.edges.front()?;
        (e < self.clock.get()).then(|| self.edges.pop_front().unwrap() - self.origin)
    }
    fn stop(&mut self) {}
}
pub struct Radio(pub Vec<u8>);
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
pub struct NoSleep;
impl Alarm for NoSleep {
    fn sleep(&mut self, _s: u32) -> WakeReason {
        WakeReason::Schedule
    }
}
/// Stored configuration (counter 0 + config.bin, as the QEMU board's
/// flash image holds it) and identity (node 1, the committed test key).
pub struct Store {
    pub config: Vec<u8>,
    pub identity: Vec<u8>,
}
impl Storage for Store {
    type Error = ();
    fn load(&mut self, slot: Slot, buf: &mut [u8]) -> Result<usize, ()> {
        let data = match slot {
            Slot::Config => &self.config,
            Slot::Identity => &self.identity,
            Slot::Baseline => return Ok(0),
        };
        buf[..data.len()].copy_from_slice(data);
        Ok(data.len())
    }
    fn store(&mut self, _s: Slot, _d: &[u8]) -> Result<(), ()> {
        Ok(())
    }
}
pub struct Batt;
impl Battery for Batt {
    fn millivolts(&mut self) -> u16 {
        3300
    }
}
pub struct Dog;
impl Watchdog for Dog {
    fn feed(&mut self) {}
}
pub struct Pin;
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
pub struct NoDelay;
impl embedded_hal::delay::DelayNs for NoDelay {
    fn delay_ns(&mut self, _ns: u32) {}
}

/// The committed test key of the fictional stand (boards/qemu-mps2/input/node.key).
pub fn test_key() -> [u8; 32] {
    let text = std::fs::read_to_string(input("node.key")).unwrap();
    let hex = text.trim();
    let mut key = [0u8; 32];
    for (i, k) in key.iter_mut().enumerate() {
        *k = u8::from_str_radix(&hex[2 * i..2 * i + 2], 16).unwrap();
    }
    key
}

/// Node id of the qemu-mps2 image's provisioned identity.
pub const NODE_ID: u16 = 1;

/// The storage of the committed input.
pub fn input_store() -> Store {
    let mut config = 0u32.to_le_bytes().to_vec();
    config.extend(std::fs::read(input("config.bin")).unwrap());
    let mut identity = [0u8; firmware::identity::IDENTITY_LEN];
    firmware::identity::encode(NODE_ID, &test_key(), &mut identity).unwrap();
    Store {
        config,
        identity: identity.to_vec(),
    }
}

/// The replay bench as a board.
pub struct ReplayBoard;

impl Board for ReplayBoard {
    type Source = Src;
    type Capture = Cap;
    type Radio = Radio;
    type Alarm = NoSleep;
    type Storage = Store;
    type Battery = Batt;
    type Watchdog = Dog;
    type Power = Pin;
    type Delay = NoDelay;
}

pub type ReplayNode<C> = Node<ReplayBoard, C>;

/// Runs cycles over the committed input until no full record is left;
/// returns the node (frames in `devices().radio.0`).
pub fn replay<C: MeasurementCore>(core: C) -> ReplayNode<C>
where
    C::Error: core::fmt::Debug,
{
    replay_with(core, |_| {})
}

/// [`replay`] with `setup` applied to the node after boot (e.g. its report policy).
pub fn replay_with<C: MeasurementCore>(
    core: C,
    setup: impl FnOnce(&mut ReplayNode<C>),
) -> ReplayNode<C>
where
    C::Error: core::fmt::Debug,
{
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
    let dev = Devices::<ReplayBoard> {
        source: Src {
            samples,
            pos: 0,
            clock: clock.clone(),
        },
        capture: Cap {
            edges,
            clock,
            origin: 0,
        },
        radio: Radio(Vec::new()),
        alarm: NoSleep,
        storage: input_store(),
        battery: Batt,
        watchdog: Dog,
        power: Pin,
        delay: NoDelay,
    };
    let mut node = Node::new(dev, core);
    assert_eq!(node.config_source(), firmware::cycle::ConfigSource::Stored);
    setup(&mut node);
    let per = node.blocks_wanted() as usize * BLOCK;
    while node.devices().source.samples.len() - node.devices().source.pos >= per {
        node.run_cycle().unwrap();
    }
    node
}

/// Splits concatenated radio frames apart: dsp-core frames by their header
/// (full, reduced, status) and 12-byte overall-core frames (kind 0x4F).
pub fn split_frames(mut b: &[u8]) -> Vec<Vec<u8>> {
    let mut out = Vec::new();
    while !b.is_empty() {
        let n = match b[0] {
            0x4F => 12,
            0x10 => wire::frame::layout::full_frame_len(usize::from(b[7] & 7)),
            0x11 => wire::frame::layout::REDUCED_LEN,
            0x12 => wire::frame::layout::STATUS_LEN,
            x => panic!("unknown frame start {x:#04x}"),
        };
        out.push(b[..n].to_vec());
        b = &b[n..];
    }
    out
}
