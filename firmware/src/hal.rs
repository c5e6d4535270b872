//! Hardware seen by the measurement cycle, as small traits owned by this
//! crate. Boards implement them; host tests implement them with mocks.
//!
//! The sensor power switch and the settling delay use embedded-hal 1.0
//! traits directly (`OutputPin`, `DelayNs`).
//!
//! [`Board`] names one type per device, so the node is generic over the
//! board and the core only ([`crate::cycle::Node<B, C>`]) rather than over
//! every device; a board implements it on a marker type and fills a
//! [`crate::cycle::Devices<B>`] with its drivers.

use crate::commission::{CommissionError, SurveyChoice};
use crate::config::PointRecord;
use dsp_core::QualityFlags;
use embedded_hal::delay::DelayNs;
use embedded_hal::digital::OutputPin;

/// A board: the device types the measurement cycle runs over, one each.
///
/// Implemented on a marker type (`struct Mps2;`) by each board and by host
/// test benches; the drivers themselves travel in [`crate::cycle::Devices`].
pub trait Board {
    /// ADC blocks (DMA double buffer or block ring).
    type Source: BlockSource;
    /// Tach edge capture on the sample clock.
    type Capture: PulseCapture;
    /// Radio link to the gateway.
    type Radio: RadioLink;
    /// Sleep and wake-up alarm.
    type Alarm: Alarm;
    /// Persistent storage of the records.
    type Storage: Storage;
    /// Supply monitor.
    type Battery: Battery;
    /// Independent watchdog.
    type Watchdog: Watchdog;
    /// Sensor supply switch (high = on).
    type Power: OutputPin;
    /// Delay for sensor settling.
    type Delay: DelayNs;
}

/// One filled block handed out by a [`BlockSource`].
#[derive(Clone, Copy, Debug)]
pub struct Block<'a> {
    /// The samples, oldest first.
    pub samples: &'a [i16],
    /// True when at least one block was lost before this one because the
    /// consumer did not hand its buffer back in time (DMA overrun).
    pub overrun: bool,
}

/// Continuous ADC sampling in blocks.
///
/// With a plain DMA double buffer, the hardware fills the other half while
/// the consumer holds the block returned by `next_block`; the held block is
/// handed back by the next call to `next_block` (or `stop`), and if the
/// hardware needed it earlier the source reports `overrun` on the following
/// block. A board can instead empty its DMA in the interrupt into a
/// [`crate::ring::BlockRing`] and hand out blocks from there, so that one
/// block may take several block times (the nRF52840 board does). Either way
/// a lost block is reported on the next block handed out.
pub trait BlockSource {
    /// Driver error.
    type Error;
    /// Starts sampling at the configured rate.
    fn start(&mut self) -> Result<(), Self::Error>;
    /// Samples per block (fixed by the board's DMA buffers).
    fn block_len(&self) -> usize;
    /// Waits for the next filled block.
    fn next_block(&mut self) -> Result<Block<'_>, Self::Error>;
    /// Stops sampling and releases both halves.
    fn stop(&mut self);
}

/// Once-per-revolution pulse capture on the same time base as the ADC clock.
///
/// Timestamps count from the first sample of the record: the capture time
/// base restarts with the sample clock at each record (tick 0 = sample 0).
pub trait PulseCapture {
    /// Driver error.
    type Error;
    /// Clears old captures and arms the input.
    fn start(&mut self) -> Result<(), Self::Error>;
    /// Pops the oldest captured edge timestamp, in timer ticks.
    fn next_edge(&mut self) -> Option<u32>;
    /// Disarms the input.
    fn stop(&mut self);
}

/// The radio link to the gateway.
pub trait RadioLink {
    /// Driver error.
    type Error;
    /// Sends one uplink frame.
    fn send(&mut self, frame: &[u8]) -> Result<(), Self::Error>;
    /// Listens in the receive window after an uplink; returns the length of a
    /// downlink copied into `buf`, or `None` when none arrived.
    fn receive(&mut self, buf: &mut [u8]) -> Result<Option<usize>, Self::Error>;
}

/// Why the node woke up.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum WakeReason {
    /// The measurement interval elapsed.
    Schedule,
    /// An external command (button, radio wake) asked for a measurement.
    Command,
}

/// Low-power sleep with a wake-up alarm.
pub trait Alarm {
    /// Sleeps (lowest power state that keeps the alarm) until `seconds`
    /// elapse or a command arrives.
    fn sleep(&mut self, seconds: u32) -> WakeReason;
}

/// Which stored record.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Slot {
    /// The measuring-point configuration ([`PointRecord`]).
    Config,
    /// The baseline the core compares against (opaque to the firmware).
    Baseline,
    /// The node's identity (node id and downlink key,
    /// [`crate::identity`]), written at provisioning. The node only reads it.
    Identity,
}

/// Persistent storage (flash pages, EEPROM, FRAM).
pub trait Storage {
    /// Driver error.
    type Error;
    /// Copies a stored record into `buf`; `Ok(0)` when the slot is empty.
    fn load(&mut self, slot: Slot, buf: &mut [u8]) -> Result<usize, Self::Error>;
    /// Replaces a stored record. A power loss during `store` must leave the
    /// old record or the new one loadable, never a mix
    /// ([`crate::store::FlashStore`] does this on NOR flash).
    fn store(&mut self, slot: Slot, data: &[u8]) -> Result<(), Self::Error>;
}

/// Supply voltage monitor.
pub trait Battery {
    /// Present supply voltage in millivolts.
    fn millivolts(&mut self) -> u16;
}

/// Independent watchdog; the cycle feeds it only after a healthy cycle.
pub trait Watchdog {
    /// Restarts the watchdog countdown.
    fn feed(&mut self);
}

/// The signal-processing core as the firmware sees it. The lead's adapter
/// implements this over `dsp_core::pipeline::Pipeline` and `wire::frame`.
pub trait MeasurementCore {
    /// Core error (configuration refused, frame too small, ...).
    type Error;
    /// Takes a baseline (stored or from a downlink) to compare reports with;
    /// the format belongs to the core. An error means it was refused.
    fn load_baseline(&mut self, data: &[u8]) -> Result<(), Self::Error>;
    /// Prepares a new measurement for this measuring point.
    fn start(&mut self, config: &PointRecord) -> Result<(), Self::Error>;
    /// Processes one block as it arrives; the block is not kept.
    fn push_block(&mut self, samples: &[i16]);
    /// Adds one tach edge (timer ticks, same time base as the samples).
    /// Edges that occurred during a block are pushed before that block.
    fn push_edge(&mut self, tick: u32);
    /// True once the core has all the record it needs; acquisition then
    /// stops early (the configured length is the limit at the lowest speed).
    fn complete(&self) -> bool {
        false
    }
    /// Ends the record and computes the report, with the firmware's quality
    /// flags (overrun, sensor fault, tach loss, low battery) merged in.
    fn finish(&mut self, flags: QualityFlags) -> Result<(), Self::Error>;
    /// Encodes the finished report; returns the number of bytes written.
    fn encode(&mut self, frame: &mut [u8]) -> Result<usize, Self::Error>;
    /// Takes the node id from the provisioned identity (called at boot).
    fn set_node_id(&mut self, _node_id: u16) {}
    /// Starts a band survey (commissioning) over the next blocks, which
    /// `push_block` then feeds to it instead of the measurement. Cores
    /// without a survey refuse.
    fn start_survey(&mut self, _config: &PointRecord) -> Result<(), CommissionError> {
        Err(CommissionError::Unsupported)
    }
    /// Ends the survey and returns its choice.
    fn finish_survey(&mut self) -> Result<SurveyChoice, CommissionError> {
        Err(CommissionError::Unsupported)
    }
}

/// A core held by reference (e.g. a large core placed in a `static`).
impl<C: MeasurementCore + ?Sized> MeasurementCore for &mut C {
    type Error = C::Error;
    fn load_baseline(&mut self, data: &[u8]) -> Result<(), Self::Error> {
        (**self).load_baseline(data)
    }
    fn start(&mut self, config: &PointRecord) -> Result<(), Self::Error> {
        (**self).start(config)
    }
    fn push_block(&mut self, samples: &[i16]) {
        (**self).push_block(samples);
    }
    fn push_edge(&mut self, tick: u32) {
        (**self).push_edge(tick);
    }
    fn complete(&self) -> bool {
        (**self).complete()
    }
    fn finish(&mut self, flags: QualityFlags) -> Result<(), Self::Error> {
        (**self).finish(flags)
    }
    fn encode(&mut self, frame: &mut [u8]) -> Result<usize, Self::Error> {
        (**self).encode(frame)
    }
    fn set_node_id(&mut self, node_id: u16) {
        (**self).set_node_id(node_id);
    }
    fn start_survey(&mut self, config: &PointRecord) -> Result<(), CommissionError> {
        (**self).start_survey(config)
    }
    fn finish_survey(&mut self) -> Result<SurveyChoice, CommissionError> {
        (**self).finish_survey()
    }
}
