//! envord node image for QEMU mps2-an386: runs measurement cycles over a
//! recording read by semihosting until it is used up, writes every frame out,
//! and reports the stack high-water mark.
//!
//! The core is the dsp-core envelope pipeline (`NodeCore`, full frames), or
//! the overall-only core when a file `core-overall` exists in the run
//! directory (12-byte frames, checked against numpy in CI).
//!
//! Exit status: 0 all cycles healthy, 2 a cycle fault, 3 input missing,
//! 4 HardFault, 101 panic.
#![no_std]
#![no_main]

use cortex_m_rt::entry;
use firmware::cycle::{Devices, Node, State};
use firmware::hal::MeasurementCore;
use firmware::overall_core::OverallCore;
use firmware::pipeline_core::NodeCore;
use qemu_mps2::*;

hardfault_exits!();

#[entry]
fn main() -> ! {
    stack::paint();
    let code = run();
    let used = stack::high_water();
    semihosting::eprintln!("stack high-water: {} of {} bytes", used, stack::size());
    defmt::info!("stack high-water {} bytes", used);
    semihosting::process::exit(code)
}

/// Node id written into pipeline frames.
const NODE_ID: u16 = 1;

fn run() -> i32 {
    // CI check of the fault path: an undefined instruction escalates to
    // HardFault, whose handler must end the run with status 4
    if semihosting::fs::File::open(c"trigger-hardfault").is_ok() {
        cortex_m::asm::udf();
    }
    if semihosting::fs::File::open(c"core-overall").is_ok() {
        return run_with(OverallCore::new());
    }
    match node_core() {
        Some(core) => run_with(core),
        None => 2,
    }
}

/// The pipeline core (~45 KiB; its pipeline is configured in place by each
/// cycle's `start`) in .bss rather than on the stack. Its own frame, so the
/// initialising temporary (about 22 KB: the compiler builds the spectrum
/// buffers on the stack before copying them) is not part of `run`'s frame.
#[inline(never)]
fn node_core() -> Option<&'static mut NodeCore> {
    cortex_m::singleton!(: NodeCore = NodeCore::new(NODE_ID))
}

#[inline(never)] // each core's frame apart: the stack figure then belongs to that core
fn run_with<C: MeasurementCore>(core: C) -> i32 {
    let (source, radio) = match (FileSource::open(), FileRadio::create()) {
        (Ok(s), Ok(r)) => (s, r),
        _ => {
            semihosting::eprintln!("input missing: recording.i16 in the run directory");
            return 3;
        }
    };
    let dev = Devices {
        source,
        capture: FileCapture::open(),
        radio,
        alarm: InstantAlarm,
        storage: FileStorage,
        battery: FixedBattery(3_300),
        watchdog: CountingWatchdog::default(),
        power: PowerFlag::default(),
        delay: SpinDelay,
    };
    let mut node = Node::new(dev, core);
    semihosting::eprintln!(
        "config: {:?}, {} blocks of {} per record",
        node.config_source(),
        node.blocks_wanted(),
        BLOCK_LEN
    );
    // instruction counts per state (meaningful only under QEMU_ICOUNT=1)
    let count = semihosting::fs::File::open(c"count-instructions").is_ok();
    ticks::start();
    let (mut acq_sum, mut acq_n, mut acq_max, mut fin_max) = (0u64, 0u64, 0u64, 0u64);
    let mut acq_max_at = 0u32;
    let mut cycles = 0u32;
    while node.devices().source.remaining_blocks() >= node.blocks_wanted() {
        let result = loop {
            let from = node.state();
            let t0 = ticks::now();
            let r = node.step();
            let n = ticks::instructions(t0, ticks::now());
            match from {
                State::Acquire => {
                    acq_sum += n;
                    acq_n += 1;
                    if n > acq_max {
                        acq_max = n;
                        acq_max_at = node.summary().blocks;
                    }
                    if n > 1_000_000 && count {
                        semihosting::eprintln!(
                            "  block {}: {} instructions",
                            node.summary().blocks,
                            n
                        );
                    }
                }
                State::Finish | State::Encode => fin_max = fin_max.max(n),
                _ => {}
            }
            match r {
                Ok(State::Sleep) => break Ok(*node.summary()),
                Ok(_) => {}
                Err(e) => break Err(e),
            }
        };
        match result {
            Ok(s) => {
                semihosting::eprintln!(
                    "cycle {}: {} blocks, {} edges, flags {:#04x}, fed {}, downlink {:?}",
                    cycles,
                    s.blocks,
                    s.edges,
                    s.flags.bits(),
                    s.fed_watchdog,
                    node.downlink()
                );
                defmt::info!("cycle {}: {}", cycles, s);
            }
            Err(e) => {
                semihosting::eprintln!("cycle {} fault: {}", cycles, e);
                return 2;
            }
        }
        cycles += 1;
    }
    semihosting::eprintln!(
        "done: {} cycles, {} frames, {} watchdog feeds",
        cycles,
        node.devices().radio.sent(),
        node.devices().watchdog.feeds
    );
    if count && acq_n > 0 {
        semihosting::eprintln!(
            "instructions per {}-sample block (incl. the semihosting read): mean {}, max {} (block {}); finish or encode step max {}",
            BLOCK_LEN,
            acq_sum / acq_n,
            acq_max,
            acq_max_at,
            fin_max
        );
    }
    if cycles == 0 {
        return 3;
    }
    0
}
