//! The block ring between the sampling interrupt and the cycle: order,
//! capacity, overrun reporting, a two-thread stress test of the lock-free
//! protocol, and a scripted slow consumer with the node's measured block
//! costs (which depth absorbs the block that completes a spectrum segment).
#![allow(
    clippy::cast_possible_truncation,
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::indexing_slicing,
    missing_docs
)]

use firmware::ring::{BlockRing, Popped, PushError, NODE_DEPTH};

fn block<const LEN: usize>(seq: u32) -> [i16; LEN] {
    let mut b = [0i16; LEN];
    for (j, s) in b.iter_mut().enumerate() {
        // seq in the first two samples, a seq-and-index pattern after
        *s = match j {
            0 => (seq & 0xFFFF) as u16 as i16,
            1 => (seq >> 16) as u16 as i16,
            _ => {
                (seq.wrapping_mul(2_654_435_761)
                    .wrapping_add(j as u32 * 40_503)
                    >> 16) as u16 as i16
            }
        };
    }
    b
}

/// The sequence number of a block made by `block`, if every sample matches.
fn seq_of<const LEN: usize>(b: &[i16; LEN]) -> Option<u32> {
    let seq = u32::from(b[0] as u16) | (u32::from(b[1] as u16) << 16);
    (block::<LEN>(seq) == *b).then_some(seq)
}

#[test]
fn first_in_first_out_across_many_wraps_for_a_depth_that_is_no_power_of_two() {
    let ring: BlockRing<3, 8> = BlockRing::new();
    let (mut tx, mut rx) = ring.split().unwrap();
    assert_eq!(ring.capacity(), 3);
    let mut out = [0i16; 8];
    let (mut next_in, mut next_out) = (0u32, 0u32);
    // push 1..3 blocks, pop 1..3 blocks, never more than the depth queued
    for round in 0..2_000u32 {
        let n_in = 1 + round % 3;
        for _ in 0..n_in {
            if ring.len() < 3 {
                tx.push(&block(next_in)).unwrap();
                next_in += 1;
            }
        }
        assert_eq!(rx.len(), (next_in - next_out) as usize);
        for _ in 0..(1 + (round / 3) % 3) {
            match rx.pop_into(&mut out) {
                Some(p) => {
                    assert_eq!(p, Popped { overrun: false });
                    assert_eq!(seq_of(&out), Some(next_out));
                    next_out += 1;
                }
                None => assert_eq!(next_in, next_out),
            }
        }
    }
    assert!(next_out > 1_000);
    assert_eq!(rx.lost(), 0);
    assert_eq!(rx.high_water(), 3);
}

#[test]
fn a_full_ring_drops_the_new_block_keeps_the_queued_ones_and_flags_the_next() {
    let ring: BlockRing<2, 4> = BlockRing::new();
    let (mut tx, mut rx) = ring.split().unwrap();
    tx.push(&block(0)).unwrap();
    tx.push(&block(1)).unwrap();
    assert_eq!(tx.push(&block(2)), Err(PushError::Full));
    assert_eq!(tx.push(&block(3)), Err(PushError::Full));
    assert_eq!(rx.lost(), 2);
    let mut out = [0i16; 4];
    // the queued blocks come out intact and unflagged: the gap is after them
    assert_eq!(rx.pop_into(&mut out), Some(Popped { overrun: false }));
    assert_eq!(seq_of(&out), Some(0));
    tx.push(&block(4)).unwrap();
    tx.push(&block(5)).unwrap_err();
    assert_eq!(rx.pop_into(&mut out), Some(Popped { overrun: false }));
    assert_eq!(seq_of(&out), Some(1));
    assert_eq!(rx.pop_into(&mut out), Some(Popped { overrun: true }));
    assert_eq!(seq_of(&out), Some(4));
    // block 5 was lost after block 4: the next one to get in is flagged
    tx.push(&block(6)).unwrap();
    assert_eq!(rx.pop_into(&mut out), Some(Popped { overrun: true }));
    assert_eq!(seq_of(&out), Some(6));
    tx.push(&block(7)).unwrap();
    assert_eq!(rx.pop_into(&mut out), Some(Popped { overrun: false }));
    assert_eq!(rx.pop_into(&mut out), None);
    assert_eq!(rx.lost(), 3);
    assert_eq!(ring.high_water(), 2);
}

#[test]
fn blocks_lost_before_the_ring_flag_the_next_block_and_count() {
    let ring: BlockRing<4, 4> = BlockRing::new();
    let (mut tx, mut rx) = ring.split().unwrap();
    tx.mark_lost(0); // nothing lost: nothing flagged
    tx.push(&block(0)).unwrap();
    tx.mark_lost(2);
    tx.push(&block(3)).unwrap();
    let mut out = [0i16; 4];
    assert_eq!(rx.pop_into(&mut out), Some(Popped { overrun: false }));
    assert_eq!(rx.pop_into(&mut out), Some(Popped { overrun: true }));
    assert_eq!(rx.lost(), 2);
}

#[test]
fn a_restart_forgets_the_last_records_gap_and_drain_its_blocks() {
    let ring: BlockRing<2, 4> = BlockRing::new();
    let (mut tx, mut rx) = ring.split().unwrap();
    tx.push(&block(0)).unwrap();
    tx.push(&block(1)).unwrap();
    tx.push(&block(2)).unwrap_err(); // lost while the last record ended
    assert_eq!(rx.drain(), 2);
    assert!(rx.is_empty());
    tx.restart();
    tx.push(&block(10)).unwrap();
    let mut out = [0i16; 4];
    // the new record's first block is not blamed for the old gap
    assert_eq!(rx.pop_into(&mut out), Some(Popped { overrun: false }));
    assert_eq!(seq_of(&out), Some(10));
    assert_eq!(rx.lost(), 1, "the count since boot is kept");
}

#[test]
fn one_producer_and_one_consumer_only() {
    static RING: BlockRing<2, 2> = BlockRing::new();
    assert!(RING.split().is_some());
    assert!(RING.split().is_none());
    assert!(RING.split().is_none());
}

/// Producer and consumer on two threads, as interrupt and thread mode: no
/// block is ever torn (every sample matches its sequence number), blocks
/// come out in order, every jump in the sequence is flagged on the block
/// after it, and the lost count equals the blocks that never came out.
#[test]
fn two_threads_never_tear_a_block_and_every_gap_is_reported() {
    const LEN: usize = 256;
    const N: u32 = 100_000;
    let ring: BlockRing<4, LEN> = BlockRing::new();
    let (mut tx, mut rx) = ring.split().unwrap();
    let done = std::sync::atomic::AtomicBool::new(false);
    // set when the consumer stops, also by a failed assertion, so that the
    // producer never waits for it forever
    let gone = std::sync::atomic::AtomicBool::new(false);
    struct Gone<'a>(&'a std::sync::atomic::AtomicBool);
    impl Drop for Gone<'_> {
        fn drop(&mut self) {
            self.0.store(true, std::sync::atomic::Ordering::Release);
        }
    }
    let (received, jumps_flagged, unflagged_ok) = std::thread::scope(|s| {
        s.spawn(|| {
            for seq in 0..N {
                let b = block::<LEN>(seq);
                let _ = tx.push(&b);
                // windows where the consumer keeps up and windows of bursts
                // faster than it, so the ring runs empty and full
                if (seq / 2_000) % 2 == 0 {
                    while ring.len() > 1 && !gone.load(std::sync::atomic::Ordering::Acquire) {
                        std::thread::yield_now();
                    }
                }
            }
            done.store(true, std::sync::atomic::Ordering::Release);
        });
        let _gone = Gone(&gone);
        let mut out = [0i16; LEN];
        let (mut received, mut jumps, mut unflagged) = (0u32, 0u32, 0u32);
        let mut last: Option<u32> = None;
        loop {
            let finished = done.load(std::sync::atomic::Ordering::Acquire);
            match rx.pop_into(&mut out) {
                Some(p) => {
                    let seq = seq_of(&out).expect("torn block");
                    let expected = last.map_or(0, |l| l + 1);
                    assert!(seq >= expected, "out of order: {seq} after {last:?}");
                    assert_eq!(p.overrun, seq != expected, "block {seq} after {last:?}");
                    if p.overrun {
                        jumps += 1;
                    } else {
                        unflagged += 1;
                    }
                    received += 1;
                    last = Some(seq);
                    if received % 1_000 == 0 {
                        // a slow consumer now and then
                        std::thread::sleep(std::time::Duration::from_micros(500));
                    }
                }
                None if finished => break,
                None => std::thread::yield_now(),
            }
        }
        (received, jumps, unflagged)
    });
    assert_eq!(ring.lost(), N - received, "every missing block is counted");
    // both paths were exercised
    assert!(jumps_flagged > 0 && ring.lost() > 0, "no overrun happened");
    assert!(unflagged_ok > 1_000);
}

// ---- scripted slow consumer with the node's measured figures ----

/// Node steps of the block that completes a spectrum segment and of the six
/// after it, which carry that segment's work one part each (mean and window
/// quarter 1; window quarters 2, 3, 4; the transform; the power average:
/// `dsp_core::spectrum::OrderSpectrum::step`), then an ordinary block;
/// instructions in the size-optimised qemu-mps2 image. Derived from
/// measurements, as the board's committed recording completes its one
/// segment per pass on its last block (the work then runs in `finish`):
/// the board image's mean block under QEMU `-icount` (`boards/size.sh`,
/// "mean", incl. the board's read of the block) plus each block's extra over
/// a mean block in `boards/qemu-bench` (INFO "segment work at 51.2 kS/s"
/// and `node_block_mean_51k2`), scaled by 5/4, the ratio of the two images'
/// segment-completing blocks before the work was spread (635,977 in the
/// board image against 509,975 for `NodePipeline::push_i16`).
const WORK_BLOCK_INSTR: [u64; 7] = [
    board(107_793),
    board(83_788),
    board(83_584),
    board(83_475),
    board(276_490),
    board(77_790),
    MEAN_BLOCK_INSTR,
];
/// Mean node step per block, qemu-mps2 image (`size.sh`, "mean").
const MEAN_BLOCK_INSTR: u64 = 85_270;
/// Mean block of `boards/qemu-bench` (`node_block_mean_51k2`).
const BENCH_MEAN_INSTR: u64 = 42_795;
/// A qemu-bench block cost carried over to the board image.
const fn board(bench: u64) -> u64 {
    MEAN_BLOCK_INSTR + (bench - BENCH_MEAN_INSTR) * 5 / 4
}
/// nRF52840 core clock.
const CPU_HZ: u64 = 64_000_000;
/// Block period at 51.2 kS/s (256 samples), microseconds.
const PERIOD_51K2_US: u64 = 5_000;
/// Blocks of one 10.29 s record at 51.2 kS/s and the blocks per spectrum
/// segment at 1500 rpm (64 revolutions of 2,048 samples), as in qemu-bench.
const RECORD_BLOCKS: u32 = 2_057;
const SEGMENT_BLOCKS: u32 = 512;

/// Microseconds for `instr` instructions at `cpi` cycles each (x10 to keep
/// integer tenths: `cpi10` = 20 means 2.0 cycles per instruction).
fn us(instr: u64, cpi10: u64) -> u64 {
    instr * cpi10 * 1_000_000 / 10 / CPU_HZ
}

struct Script {
    period_us: u64,
    ordinary_us: u64,
    /// The segment-completing block and the blocks after it, in order.
    work_us: Vec<u64>,
}

impl Script {
    /// The node's measured costs at `cpi10` tenths of a cycle per instruction.
    fn node(cpi10: u64) -> Self {
        Script {
            period_us: PERIOD_51K2_US,
            ordinary_us: us(MEAN_BLOCK_INSTR, cpi10),
            work_us: WORK_BLOCK_INSTR.iter().map(|&i| us(i, cpi10)).collect(),
        }
    }
}

#[derive(Debug, PartialEq)]
struct Outcome {
    lost: u32,
    flagged: u32,
    high_water: usize,
    processed: u32,
}

/// Feeds a whole record through a real ring: block k is complete at
/// k x period and pushed then (the interrupt); the consumer takes the
/// oldest block as soon as it is free and spends `work_us[i]` on the i-th
/// block from a segment-completing one on and `ordinary_us` on the others.
/// At equal times the interrupt comes first (the pessimistic order).
fn run<const D: usize>(s: &Script) -> Outcome {
    let ring: BlockRing<D, 4> = BlockRing::new();
    let (mut tx, mut rx) = ring.split().unwrap();
    let mut out = [0i16; 4];
    let mut free_at = 0u64;
    let mut flagged = 0;
    let mut processed = 0;
    let mut consume_before = |t: u64, rx: &mut firmware::ring::Consumer<'_, D, 4>| {
        while free_at < t {
            let Some(p) = rx.pop_into(&mut out) else {
                break;
            };
            let seq = seq_of(&out).unwrap();
            let start = free_at.max(u64::from(seq) * s.period_us);
            // Blocks since the last segment-completing one (seq % SEGMENT_BLOCKS
            // == SEGMENT_BLOCKS - 1).
            let since = (seq + 1) % SEGMENT_BLOCKS;
            let cost = if seq + 1 >= SEGMENT_BLOCKS {
                s.work_us.get(since as usize).copied()
            } else {
                None
            };
            free_at = start + cost.unwrap_or(s.ordinary_us);
            flagged += u32::from(p.overrun);
            processed += 1;
        }
    };
    for k in 1..=RECORD_BLOCKS {
        let t = u64::from(k) * s.period_us;
        consume_before(t, &mut rx);
        let _ = tx.push(&block(k));
    }
    consume_before(u64::MAX, &mut rx);
    Outcome {
        lost: rx.lost(),
        flagged,
        high_water: rx.high_water(),
        processed,
    }
}

#[test]
fn the_spread_segment_work_fits_the_nodes_depth_up_to_two_and_a_half_cycles_per_instruction() {
    // One cycle per instruction: only the transform block takes more than
    // a period in the board image (1.18, with opt-level "s" and the board's
    // read; 0.86 for `push_i16` alone in qemu-bench), so the ring never
    // holds more than one waiting block.
    let cpi1 = Script::node(10);
    let over: Vec<u64> = cpi1
        .work_us
        .iter()
        .copied()
        .filter(|&w| w >= PERIOD_51K2_US)
        .collect();
    assert_eq!(over, [5_896], "{:?}", cpi1.work_us);
    let one = run::<NODE_DEPTH>(&cpi1);
    assert_eq!(
        (one.lost, one.flagged, one.high_water),
        (0, 0, 1),
        "{one:?}"
    );
    // The sizing allowance, 2 cycles per instruction: the transform block
    // takes 2.4 periods; depth 1 overruns, the node's depth does not and
    // keeps one slot spare.
    let cpi2 = Script::node(20);
    let d1 = run::<1>(&cpi2);
    assert!(d1.lost > 0 && d1.flagged > 0, "{d1:?}");
    let node = run::<NODE_DEPTH>(&cpi2);
    assert_eq!((node.lost, node.flagged), (0, 0), "{node:?}");
    assert_eq!(node.processed, RECORD_BLOCKS);
    assert_eq!(node.high_water, NODE_DEPTH - 1, "one slot spare: {node:?}");
    // 2.5 cycles per instruction still fit (no slot spare); at 3 the
    // ordinary blocks take 0.8 periods, the backlog of the segment's work
    // drains too slowly and the node's depth would need 5: the limit of
    // this sizing, shown rather than hidden.
    let fits = run::<NODE_DEPTH>(&Script::node(25));
    assert_eq!((fits.lost, fits.high_water), (0, NODE_DEPTH), "{fits:?}");
    assert!(run::<NODE_DEPTH>(&Script::node(30)).lost > 0);
    assert_eq!(run::<5>(&Script::node(30)).lost, 0);
}

#[test]
fn a_depth_absorbs_spikes_shorter_than_depth_plus_one_periods() {
    let p = PERIOD_51K2_US;
    let script = |spike_us| Script {
        period_us: p,
        ordinary_us: us(MEAN_BLOCK_INSTR, 30),
        work_us: vec![spike_us],
    };
    let limit = (NODE_DEPTH as u64 + 1) * p;
    assert_eq!(run::<NODE_DEPTH>(&script(limit - 1)).lost, 0);
    let over = run::<NODE_DEPTH>(&script(limit + 1));
    assert!(over.lost > 0 && over.flagged > 0, "{over:?}");
    // the same boundary at depth 1
    assert_eq!(run::<1>(&script(2 * p - 1)).lost, 0);
    assert!(run::<1>(&script(2 * p + 1)).lost > 0);
}
