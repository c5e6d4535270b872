//! Mock hardware shared by the cycle tests. Every device appends to one
//! shared event log so tests can check the order of operations.
#![allow(
    dead_code,
    clippy::panic,
    clippy::type_complexity,
    clippy::cast_possible_truncation,
    clippy::unwrap_used,
    clippy::indexing_slicing,
    missing_docs
)]

pub mod flash;

use dsp_core::QualityFlags;
use firmware::config::PointRecord;
use firmware::cycle::{Devices, Node};
use firmware::hal::*;
use std::cell::RefCell;
use std::collections::{HashMap, VecDeque};
use std::rc::Rc;

#[derive(Clone, Debug, PartialEq)]
pub enum Ev {
    PowerHigh,
    PowerLow,
    DelayMs(u32),
    Sleep(u32),
    SourceStart,
    SourceStop,
    Block(usize),
    CaptureStart,
    CaptureStop,
    CoreStart,
    CorePush(usize),
    CoreEdge(u32),
    CoreFinish(QualityFlags),
    CoreEncode,
    Send(Vec<u8>),
    Receive,
    Store(Slot),
    Feed,
}

pub type Log = Rc<RefCell<Vec<Ev>>>;

pub fn count(log: &Log, f: impl Fn(&Ev) -> bool) -> usize {
    log.borrow().iter().filter(|e| f(e)).count()
}

/// A block source fed from a list of blocks; each block may be marked as
/// following an overrun. Checks that the previous block reached the core
/// before handing out the next one (streaming, nothing buffered).
pub struct MockSource {
    pub log: Log,
    pub blocks: VecDeque<(Vec<i16>, bool)>,
    pub current: Vec<i16>,
    pub block_len: usize,
    pub fail_next: bool,
    pub handed_out: usize,
    /// Check that each block reached the (mock) core before the next.
    pub push_check: bool,
}

impl BlockSource for MockSource {
    type Error = ();
    fn block_len(&self) -> usize {
        self.block_len
    }
    fn start(&mut self) -> Result<(), ()> {
        self.log.borrow_mut().push(Ev::SourceStart);
        Ok(())
    }
    fn next_block(&mut self) -> Result<Block<'_>, ()> {
        if self.fail_next {
            return Err(());
        }
        // the core must have consumed every block handed out so far
        if self.push_check {
            let pushed = count(&self.log, |e| matches!(e, Ev::CorePush(_)));
            assert_eq!(
                pushed, self.handed_out,
                "block fetched before the previous one was processed"
            );
        }
        let (b, overrun) = self.blocks.pop_front().ok_or(())?;
        self.current = b;
        self.handed_out += 1;
        self.log.borrow_mut().push(Ev::Block(self.current.len()));
        Ok(Block {
            samples: &self.current,
            overrun,
        })
    }
    fn stop(&mut self) {
        self.log.borrow_mut().push(Ev::SourceStop);
    }
}

pub struct MockCapture {
    pub log: Log,
    /// Edges that become visible after each block (index = block number).
    pub per_block: VecDeque<Vec<u32>>,
    pub pending: VecDeque<u32>,
    pub loaded: bool,
}

impl PulseCapture for MockCapture {
    type Error = ();
    fn start(&mut self) -> Result<(), ()> {
        self.log.borrow_mut().push(Ev::CaptureStart);
        Ok(())
    }
    fn next_edge(&mut self) -> Option<u32> {
        // one batch of edges becomes visible per drain (after each block)
        if !self.loaded {
            if let Some(next) = self.per_block.pop_front() {
                self.pending.extend(next);
            }
            self.loaded = true;
        }
        let e = self.pending.pop_front();
        if e.is_none() {
            self.loaded = false;
        }
        e
    }
    fn stop(&mut self) {
        self.log.borrow_mut().push(Ev::CaptureStop);
    }
}

pub struct MockRadio {
    pub log: Log,
    pub downlinks: VecDeque<Vec<u8>>,
    pub fail_send: bool,
}

impl RadioLink for MockRadio {
    type Error = ();
    fn send(&mut self, frame: &[u8]) -> Result<(), ()> {
        if self.fail_send {
            return Err(());
        }
        self.log.borrow_mut().push(Ev::Send(frame.to_vec()));
        Ok(())
    }
    fn receive(&mut self, buf: &mut [u8]) -> Result<Option<usize>, ()> {
        self.log.borrow_mut().push(Ev::Receive);
        Ok(self.downlinks.pop_front().map(|d| {
            buf[..d.len()].copy_from_slice(&d);
            d.len()
        }))
    }
}

pub struct MockAlarm {
    pub log: Log,
    pub reasons: VecDeque<WakeReason>,
}

impl Alarm for MockAlarm {
    fn sleep(&mut self, seconds: u32) -> WakeReason {
        self.log.borrow_mut().push(Ev::Sleep(seconds));
        self.reasons.pop_front().unwrap_or(WakeReason::Schedule)
    }
}

#[derive(Default)]
pub struct MockStorage {
    pub log: Option<Log>,
    pub slots: HashMap<&'static str, Vec<u8>>,
    pub fail_store: bool,
}

fn key(slot: Slot) -> &'static str {
    match slot {
        Slot::Config => "config",
        Slot::Baseline => "baseline",
        Slot::Identity => "identity",
    }
}

impl Storage for MockStorage {
    type Error = ();
    fn load(&mut self, slot: Slot, buf: &mut [u8]) -> Result<usize, ()> {
        match self.slots.get(key(slot)) {
            None => Ok(0),
            Some(d) => {
                buf.get_mut(..d.len()).ok_or(())?.copy_from_slice(d);
                Ok(d.len())
            }
        }
    }
    fn store(&mut self, slot: Slot, data: &[u8]) -> Result<(), ()> {
        if self.fail_store || slot == Slot::Identity {
            return Err(());
        }
        if let Some(l) = &self.log {
            l.borrow_mut().push(Ev::Store(slot));
        }
        self.slots.insert(key(slot), data.to_vec());
        Ok(())
    }
}

pub struct MockBattery(pub u16);
impl Battery for MockBattery {
    fn millivolts(&mut self) -> u16 {
        self.0
    }
}

pub struct MockWatchdog(pub Log);
impl Watchdog for MockWatchdog {
    fn feed(&mut self) {
        self.0.borrow_mut().push(Ev::Feed);
    }
}

pub struct MockPin {
    pub log: Log,
    pub fail: bool,
}
impl embedded_hal::digital::ErrorType for MockPin {
    type Error = embedded_hal::digital::ErrorKind;
}
impl embedded_hal::digital::OutputPin for MockPin {
    fn set_low(&mut self) -> Result<(), Self::Error> {
        self.log.borrow_mut().push(Ev::PowerLow);
        Ok(())
    }
    fn set_high(&mut self) -> Result<(), Self::Error> {
        if self.fail {
            return Err(embedded_hal::digital::ErrorKind::Other);
        }
        self.log.borrow_mut().push(Ev::PowerHigh);
        Ok(())
    }
}

pub struct MockDelay(pub Log);
impl embedded_hal::delay::DelayNs for MockDelay {
    fn delay_ns(&mut self, _ns: u32) {}
    fn delay_ms(&mut self, ms: u32) {
        self.0.borrow_mut().push(Ev::DelayMs(ms));
    }
}

/// A core that sums what it sees and encodes a small frame of it.
pub struct MockCore {
    pub log: Log,
    pub samples: Vec<i16>,
    pub edges: Vec<u32>,
    pub baseline: Option<Vec<u8>>,
    pub fail_finish: bool,
    pub flags: QualityFlags,
    /// Reports `complete()` once this many samples arrived.
    pub complete_after: Option<usize>,
}

impl MeasurementCore for MockCore {
    type Error = ();
    fn load_baseline(&mut self, data: &[u8]) -> Result<(), ()> {
        if data.first() == Some(&0xFF) {
            return Err(()); // the mock refuses baselines starting with 0xFF
        }
        self.baseline = Some(data.to_vec());
        Ok(())
    }
    fn start(&mut self, _config: &PointRecord) -> Result<(), ()> {
        self.samples.clear();
        self.edges.clear();
        self.log.borrow_mut().push(Ev::CoreStart);
        Ok(())
    }
    fn push_block(&mut self, samples: &[i16]) {
        self.samples.extend_from_slice(samples);
        self.log.borrow_mut().push(Ev::CorePush(samples.len()));
    }
    fn push_edge(&mut self, tick: u32) {
        self.edges.push(tick);
        self.log.borrow_mut().push(Ev::CoreEdge(tick));
    }
    fn complete(&self) -> bool {
        self.complete_after.is_some_and(|n| self.samples.len() >= n)
    }
    fn finish(&mut self, flags: QualityFlags) -> Result<(), ()> {
        self.flags = flags;
        self.log.borrow_mut().push(Ev::CoreFinish(flags));
        if self.fail_finish {
            Err(())
        } else {
            Ok(())
        }
    }
    fn encode(&mut self, frame: &mut [u8]) -> Result<usize, ()> {
        let flags = self.flags;
        self.log.borrow_mut().push(Ev::CoreEncode);
        let n = u16::try_from(self.samples.len())
            .unwrap_or(u16::MAX)
            .to_le_bytes();
        let out = [
            wire::overall::flag_byte(flags),
            n[0],
            n[1],
            u8::try_from(self.edges.len()).unwrap_or(255),
        ];
        frame[..4].copy_from_slice(&out);
        Ok(4)
    }
}

/// The mock devices as a board, with any storage.
pub struct MockBoard<St>(std::marker::PhantomData<St>);

impl<St: Storage> Board for MockBoard<St> {
    type Source = MockSource;
    type Capture = MockCapture;
    type Radio = MockRadio;
    type Alarm = MockAlarm;
    type Storage = St;
    type Battery = MockBattery;
    type Watchdog = MockWatchdog;
    type Power = MockPin;
    type Delay = MockDelay;
}

/// A node over the mock devices, with any storage and core.
pub type MockNode<St, C = MockCore> = Node<MockBoard<St>, C>;

pub type TestNode = MockNode<MockStorage>;

/// Test bench: blocks of a sine-like signal with tach edges in every block.
pub struct Bench {
    pub log: Log,
    pub block_len: usize,
    pub blocks: Vec<(Vec<i16>, bool)>,
    pub edges: Vec<Vec<u32>>,
    pub storage: MockStorage,
    pub battery_mv: u16,
    pub downlinks: Vec<Vec<u8>>,
    pub reasons: Vec<WakeReason>,
    pub radio_fails: bool,
    pub core_fails_finish: bool,
    pub pin_fails: bool,
    pub core_complete_after: Option<usize>,
    pub push_check: bool,
}

/// A healthy block: a triangle wave of +-1000 counts (well inside 12 bits).
pub fn healthy_block(len: usize, phase: usize) -> Vec<i16> {
    (0..len)
        .map(|i| {
            let k = ((i + phase) % 40) as i16;
            (if k < 20 { k } else { 40 - k }) * 100 - 1000
        })
        .collect()
}

impl Bench {
    pub fn new(n_blocks: usize, block_len: usize) -> Self {
        Self {
            log: Rc::new(RefCell::new(Vec::new())),
            block_len,
            blocks: (0..n_blocks)
                .map(|b| (healthy_block(block_len, b), false))
                .collect(),
            edges: (0..n_blocks).map(|b| vec![(b as u32) * 1000 + 7]).collect(),
            storage: MockStorage {
                slots: HashMap::from([("identity", identity_record(NODE_ID, &KEY))]),
                ..MockStorage::default()
            },
            battery_mv: 3300,
            downlinks: Vec::new(),
            reasons: Vec::new(),
            radio_fails: false,
            core_fails_finish: false,
            pin_fails: false,
            core_complete_after: None,
            push_check: true,
        }
    }

    pub fn build(mut self) -> (TestNode, Log) {
        let mut storage = std::mem::take(&mut self.storage);
        storage.log = Some(self.log.clone());
        self.build_with(storage)
    }

    /// Builds the node over any storage (the bench's own is not used).
    pub fn build_with<St: Storage>(self, storage: St) -> (MockNode<St>, Log) {
        let core = MockCore {
            log: self.log.clone(),
            samples: Vec::new(),
            edges: Vec::new(),
            baseline: None,
            fail_finish: self.core_fails_finish,
            flags: QualityFlags::empty(),
            complete_after: self.core_complete_after,
        };
        self.build_full(storage, core)
    }

    /// Builds the node over any storage and any core.
    pub fn build_full<St: Storage, C: MeasurementCore>(
        self,
        storage: St,
        core: C,
    ) -> (MockNode<St, C>, Log) {
        let log = self.log.clone();
        let dev = Devices::<MockBoard<St>> {
            source: MockSource {
                log: log.clone(),
                blocks: self.blocks.into(),
                current: Vec::new(),
                block_len: self.block_len,
                fail_next: false,
                handed_out: 0,
                push_check: self.push_check,
            },
            capture: MockCapture {
                log: log.clone(),
                per_block: self.edges.into(),
                pending: VecDeque::new(),
                loaded: false,
            },
            radio: MockRadio {
                log: log.clone(),
                downlinks: self.downlinks.into(),
                fail_send: self.radio_fails,
            },
            alarm: MockAlarm {
                log: log.clone(),
                reasons: self.reasons.into(),
            },
            storage,
            battery: MockBattery(self.battery_mv),
            watchdog: MockWatchdog(log.clone()),
            power: MockPin {
                log: log.clone(),
                fail: self.pin_fails,
            },
            delay: MockDelay(log.clone()),
        };
        let node = Node::new(dev, core);
        log.borrow_mut().clear();
        (node, log)
    }
}

/// A valid configuration that records exactly `blocks` blocks of 256 at
/// 25.6 kHz: revs * 60 / rpm_min * fs = blocks * 256 with 4 revolutions.
pub fn config_for_blocks(blocks: u32) -> PointRecord {
    let mut c = PointRecord::default();
    c.sample_rate_hz = 25_600;
    c.record_revs = 4;
    c.speed_min_rpm = 24_000.0 / blocks as f32;
    c.speed_max_rpm = 60_000.0;
    c.settle_ms = 150;
    c.interval_s = 600;
    c
}

/// Encodes a record for storage or a downlink.
pub fn encode(c: &PointRecord) -> Vec<u8> {
    let mut buf = [0u8; firmware::config::MAX_RECORD_LEN];
    let n = c.encode(&mut buf).unwrap();
    buf[..n].to_vec()
}

/// Encodes what the node stores: the counter and the record.
pub fn stored(counter: u32, c: &PointRecord) -> Vec<u8> {
    let mut buf = [0u8; firmware::config::MAX_STORED_LEN];
    let n = firmware::config::StoredConfig {
        counter,
        record: c.clone(),
    }
    .encode(&mut buf)
    .unwrap();
    buf[..n].to_vec()
}

/// Node id and key of the bench's provisioned identity (invented values).
pub const NODE_ID: u16 = 0x0A17;
/// The bench node's downlink key.
pub const KEY: [u8; 32] = [0x42; 32];

/// The identity record of the bench node.
pub fn identity_record(node_id: u16, key: &[u8; 32]) -> Vec<u8> {
    let mut buf = [0u8; firmware::identity::IDENTITY_LEN];
    firmware::identity::encode(node_id, key, &mut buf).unwrap();
    buf.to_vec()
}

/// A downlink for the bench node signed with its key.
pub fn signed(counter: u32, payload: &[u8]) -> Vec<u8> {
    signed_for(NODE_ID, &KEY, counter, payload)
}

/// A downlink for any node and key.
pub fn signed_for(node: u16, key: &[u8; 32], counter: u32, payload: &[u8]) -> Vec<u8> {
    let mut buf = [0u8; 512];
    let n = firmware::downlink_auth::sign(
        &firmware::downlink_auth::DownlinkKey::new(*key),
        node,
        counter,
        payload,
        &mut buf,
    )
    .unwrap();
    buf[..n].to_vec()
}

/// A signed configuration downlink.
pub fn config_downlink(counter: u32, c: &PointRecord) -> Vec<u8> {
    let mut p = vec![0x01];
    p.extend(encode(c));
    signed(counter, &p)
}

impl Bench {
    /// Stores a configuration recording `blocks` blocks (counter 0).
    pub fn with_config_blocks(mut self, blocks: u32) -> Self {
        self.storage
            .slots
            .insert("config", stored(0, &config_for_blocks(blocks)));
        self
    }

    /// Removes the provisioned identity.
    pub fn unprovisioned(mut self) -> Self {
        self.storage.slots.remove("identity");
        self
    }
}
