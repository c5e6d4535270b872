//! A queue of ADC blocks between the sampling interrupt (producer) and the
//! measurement cycle (consumer), so that a block that takes several block
//! times to process (the one that completes a spectrum segment runs the
//! 4096-point transform) does not lose samples.
//!
//! The board's interrupt copies each block the DMA finished into the ring
//! ([`Producer::push`]) and hands its DMA buffer straight back to the
//! hardware; the cycle copies the oldest block out ([`Consumer::pop_into`])
//! when it is ready for it. A full ring refuses the new block and counts it
//! lost; the next block that gets in carries `overrun`, which the cycle turns
//! into `PROCESSING_OVERRUN` as before. Nothing is lost silently: every
//! refused block is counted ([`Consumer::lost`]) and flags the first block
//! after the gap.
//!
//! Single producer, single consumer, lock-free and without `unsafe`: the
//! samples are `AtomicI16` (plain 16-bit loads and stores on the Cortex-M4),
//! and the indices are published with release/acquire ordering, so the
//! consumer never sees a slot the producer is still writing and the producer
//! never overwrites a slot the consumer is still reading (a single-producer,
//! single-consumer ring after L. Lamport, "Specifying concurrent program
//! modules", ACM TOPLAS 5(2), 1983). [`BlockRing::split`] hands out the one
//! producer and the one consumer once, so a `static` ring can be shared
//! between an interrupt handler and thread mode without a lock.
//!
//! # Depth on the node ([`NODE_DEPTH`])
//! The ring absorbs a block that takes `S` block periods to process if
//! `S < depth + 1` (the block being processed has already left the ring, and
//! the next pop makes room before block `depth + 1` arrives), provided the
//! ordinary blocks take less than one period on average so that the backlog
//! drains (`firmware/tests/ring.rs` scripts this with the measured figures).
//! The work of a completed spectrum segment (window, 4096-point transform,
//! power average) is spread over the six blocks after it
//! (`dsp_core::spectrum::OrderSpectrum::step`), so the costliest block is
//! the one that runs the transform: 0.28 M instructions for
//! `NodePipeline::push_i16` in `boards/qemu-bench` (0.86 of a 5 ms block at
//! 51.2 kS/s and 64 MHz, one cycle per instruction), an estimated 0.38 M in the
//! size-optimised board image with its read of the block; mean blocks about
//! 0.085 M there. Before the spreading it was 0.64 M in the board image, the
//! whole transform and average inside the block that completed the segment,
//! and the ring was 6 deep. Cycles per instruction on silicon are not
//! measured here; FP multiply-accumulates take 3 cycles and loads 2 on the
//! Cortex-M4F, but most instructions take one. The depth is sized for an
//! allowance of 2 cycles per instruction with one slot spare: [`NODE_DEPTH`]
//! = 3. The scripted consumer with the measured figures loses nothing up to
//! 2.5 cycles per instruction; at 3, where even an ordinary block takes 0.8
//! of a period, it needs 5 (the test shows both). Each slot costs
//! `2 x LEN + 1` bytes of RAM, plus the indices: 3 slots of 256 samples are
//! 1,557 bytes on the M4F, 1,539 fewer than the 6 before.

use core::sync::atomic::{AtomicBool, AtomicI16, AtomicU32, AtomicUsize, Ordering};

/// Ring depth the node boards use (see the module docs for the sizing).
pub const NODE_DEPTH: usize = 3;

/// Why [`Producer::push`] refused a block.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum PushError {
    /// Every slot holds a block the consumer has not taken yet: the block
    /// was dropped, counted as lost, and the next block that gets in carries
    /// `overrun`.
    Full,
}

impl core::fmt::Display for PushError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match self {
            Self::Full => f.write_str("block ring full: block lost (consumer too slow)"),
        }
    }
}

impl core::error::Error for PushError {}

/// A block taken out of the ring.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Popped {
    /// At least one block was lost right before this one.
    pub overrun: bool,
}

/// `DEPTH` blocks of `LEN` samples, shared by one [`Producer`] and one
/// [`Consumer`] (see the module docs). All zeros when new, so a `static`
/// ring lives in `.bss`.
///
/// ```
/// use firmware::ring::BlockRing;
/// static RING: BlockRing<2, 4> = BlockRing::new();
/// let (mut tx, mut rx) = RING.split().unwrap();
/// assert!(RING.split().is_none()); // one producer, one consumer
/// tx.push(&[1, 2, 3, 4]).unwrap();
/// tx.push(&[5, 6, 7, 8]).unwrap();
/// assert!(tx.push(&[9, 9, 9, 9]).is_err()); // full: lost, not overwritten
/// let mut out = [0i16; 4];
/// assert_eq!(rx.pop_into(&mut out).map(|p| p.overrun), Some(false));
/// assert_eq!(out, [1, 2, 3, 4]);
/// tx.push(&[10, 11, 12, 13]).unwrap();
/// rx.pop_into(&mut out);
/// assert_eq!(rx.pop_into(&mut out).map(|p| p.overrun), Some(true)); // after the gap
/// assert_eq!(out, [10, 11, 12, 13]);
/// assert_eq!(rx.lost(), 1);
/// ```
pub struct BlockRing<const DEPTH: usize, const LEN: usize> {
    slots: [[AtomicI16; LEN]; DEPTH],
    /// The block in the slot follows a gap.
    gap: [AtomicBool; DEPTH],
    /// Producer position, counted modulo `2 x DEPTH` (so that full and empty
    /// differ for any depth); written by the producer only.
    tail: AtomicUsize,
    /// Consumer position, modulo `2 x DEPTH`; written by the consumer only.
    head: AtomicUsize,
    /// Blocks lost since the ring was made (saturating); producer only.
    lost: AtomicU32,
    /// Most blocks queued at once; producer only.
    high_water: AtomicUsize,
    split: AtomicBool,
}

impl<const DEPTH: usize, const LEN: usize> Default for BlockRing<DEPTH, LEN> {
    fn default() -> Self {
        Self::new()
    }
}

impl<const DEPTH: usize, const LEN: usize> BlockRing<DEPTH, LEN> {
    /// An empty ring (all zeros).
    pub const fn new() -> Self {
        const { assert!(DEPTH > 0 && LEN > 0, "a block ring needs slots and samples") };
        Self {
            slots: [const { [const { AtomicI16::new(0) }; LEN] }; DEPTH],
            gap: [const { AtomicBool::new(false) }; DEPTH],
            tail: AtomicUsize::new(0),
            head: AtomicUsize::new(0),
            lost: AtomicU32::new(0),
            high_water: AtomicUsize::new(0),
            split: AtomicBool::new(false),
        }
    }

    /// The producer and the consumer, the first time only (`None` after).
    pub fn split(&self) -> Option<(Producer<'_, DEPTH, LEN>, Consumer<'_, DEPTH, LEN>)> {
        if self.split.swap(true, Ordering::AcqRel) {
            return None;
        }
        Some((
            Producer {
                ring: self,
                gap_pending: false,
            },
            Consumer { ring: self },
        ))
    }

    /// Blocks queued now.
    pub fn len(&self) -> usize {
        queued::<DEPTH>(
            self.tail.load(Ordering::Acquire),
            self.head.load(Ordering::Acquire),
        )
    }

    /// True when no block is queued.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Slots in the ring.
    pub const fn capacity(&self) -> usize {
        DEPTH
    }

    /// Blocks lost since the ring was made (saturating at `u32::MAX`).
    pub fn lost(&self) -> u32 {
        self.lost.load(Ordering::Relaxed)
    }

    /// Most blocks that were queued at once since the ring was made: how
    /// close the node came to an overrun (a bring-up figure).
    pub fn high_water(&self) -> usize {
        self.high_water.load(Ordering::Relaxed)
    }
}

/// Blocks between consumer position `head` and producer position `tail`.
fn queued<const DEPTH: usize>(tail: usize, head: usize) -> usize {
    let wrap = 2 * DEPTH;
    (tail % wrap + wrap - head % wrap) % wrap
}

/// The next position, modulo `2 x DEPTH`.
fn advance<const DEPTH: usize>(pos: usize) -> usize {
    (pos % (2 * DEPTH) + 1) % (2 * DEPTH)
}

/// The producer side: the sampling interrupt. Holds no samples itself.
pub struct Producer<'a, const DEPTH: usize, const LEN: usize> {
    ring: &'a BlockRing<DEPTH, LEN>,
    /// A block was lost since the last one that got in.
    gap_pending: bool,
}

impl<const DEPTH: usize, const LEN: usize> Producer<'_, DEPTH, LEN> {
    /// Copies one block in. When every slot is taken the block is dropped
    /// (the queued ones are kept), counted as lost, and the next block that
    /// gets in carries `overrun`.
    pub fn push(&mut self, block: &[i16; LEN]) -> Result<(), PushError> {
        let r = self.ring;
        let tail = r.tail.load(Ordering::Relaxed);
        // Acquire: the consumer's reads of a slot end before it is reused.
        let head = r.head.load(Ordering::Acquire);
        let n = queued::<DEPTH>(tail, head);
        if n >= DEPTH {
            self.mark_lost(1);
            return Err(PushError::Full);
        }
        let i = tail % DEPTH;
        if let (Some(slot), Some(gap)) = (r.slots.get(i), r.gap.get(i)) {
            for (d, &s) in slot.iter().zip(block.iter()) {
                d.store(s, Ordering::Relaxed);
            }
            gap.store(core::mem::take(&mut self.gap_pending), Ordering::Relaxed);
        }
        // Release: the slot's samples are visible before the block counts.
        r.tail.store(advance::<DEPTH>(tail), Ordering::Release);
        if n + 1 > r.high_water.load(Ordering::Relaxed) {
            r.high_water.store(n + 1, Ordering::Relaxed);
        }
        Ok(())
    }

    /// Records `blocks` lost before they reached the ring (e.g. the DMA
    /// wrapped before the interrupt ran): the next block that gets in
    /// carries `overrun`.
    pub fn mark_lost(&mut self, blocks: u32) {
        if blocks == 0 {
            return;
        }
        self.gap_pending = true;
        let lost = self.ring.lost.load(Ordering::Relaxed);
        self.ring
            .lost
            .store(lost.saturating_add(blocks), Ordering::Relaxed);
    }

    /// Forgets a gap still pending from an earlier record (call when
    /// sampling restarts; the consumer drains the old blocks with
    /// [`Consumer::drain`]). The lost count is kept.
    pub fn restart(&mut self) {
        self.gap_pending = false;
    }
}

/// The consumer side: the measurement cycle, in thread mode.
pub struct Consumer<'a, const DEPTH: usize, const LEN: usize> {
    ring: &'a BlockRing<DEPTH, LEN>,
}

impl<const DEPTH: usize, const LEN: usize> Consumer<'_, DEPTH, LEN> {
    /// Copies the oldest block into `out` and frees its slot; `None` when
    /// the ring is empty.
    pub fn pop_into(&mut self, out: &mut [i16; LEN]) -> Option<Popped> {
        let r = self.ring;
        let head = r.head.load(Ordering::Relaxed);
        // Acquire: the producer's writes of the slot are visible.
        let tail = r.tail.load(Ordering::Acquire);
        if queued::<DEPTH>(tail, head) == 0 {
            return None;
        }
        let i = head % DEPTH;
        let mut overrun = false;
        if let (Some(slot), Some(gap)) = (r.slots.get(i), r.gap.get(i)) {
            for (o, s) in out.iter_mut().zip(slot.iter()) {
                *o = s.load(Ordering::Relaxed);
            }
            overrun = gap.load(Ordering::Relaxed);
        }
        // Release: our reads of the slot end before the producer reuses it.
        r.head.store(advance::<DEPTH>(head), Ordering::Release);
        Some(Popped { overrun })
    }

    /// Drops every queued block (blocks of an earlier record, when sampling
    /// restarts); returns how many.
    pub fn drain(&mut self) -> usize {
        let r = self.ring;
        let head = r.head.load(Ordering::Relaxed);
        let tail = r.tail.load(Ordering::Acquire);
        r.head.store(tail, Ordering::Release);
        queued::<DEPTH>(tail, head)
    }

    /// Blocks queued now.
    pub fn len(&self) -> usize {
        self.ring.len()
    }

    /// True when no block is queued.
    pub fn is_empty(&self) -> bool {
        self.ring.is_empty()
    }

    /// Blocks lost since the ring was made.
    pub fn lost(&self) -> u32 {
        self.ring.lost()
    }

    /// Most blocks queued at once since the ring was made.
    pub fn high_water(&self) -> usize {
        self.ring.high_water()
    }
}
