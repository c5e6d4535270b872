//! envord node image for QEMU mps2-an386: runs measurement cycles over a
//! recording read by semihosting until it is used up, writes every frame out,
//! and reports the stack high-water mark.
//!
//! The core is the dsp-core envelope pipeline (`NodeCore`, full frames, band
//! survey), or the overall-only core when a file `core-overall` exists in the
//! run directory (12-byte frames, checked against numpy in CI). Storage is
//! the emulated flash `flash.bin` through the firmware's power-safe store;
//! after each cycle the node's status (what its status frame carries) is
//! printed on stderr.
//!
//! Exit status: 0 all cycles healthy, 2 a cycle fault, 3 input missing,
//! 4 HardFault, 101 panic.
#![no_std]
#![no_main]

use cortex_m_rt::entry;
use firmware::cycle::{CycleKind, Devices, Node, State};
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

/// Node id of frames when `flash.bin` has no identity (the provisioned one
/// replaces it).
const NODE_ID: u16 = 0;

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

/// The pipeline core (~53 KiB with its band survey; its pipeline is
/// configured in place by each cycle's `start`) in .bss rather than on the
/// stack. Its own frame, so the initialising temporary (about 22 KB: the
/// compiler builds the spectrum buffers on the stack before copying them) is
/// not part of `run`'s frame.
#[inline(never)]
fn node_core() -> Option<&'static mut NodeCore> {
    cortex_m::singleton!(: NodeCore = NodeCore::new(NODE_ID))
}

#[inline(never)] // each core's frame apart: the stack figure then belongs to that core
fn run_with<C: MeasurementCore>(core: C) -> i32 {
    let (source, radio, flash) = match (FileSource::open(), FileRadio::create(), FileFlash::open())
    {
        (Ok(s), Ok(r), Ok(f)) => (s, r, f),
        _ => {
            semihosting::eprintln!(
                "input missing: recording.i16 and flash.bin (make_input.py flash) in the run directory"
            );
            return 3;
        }
    };
    let Ok(storage) = firmware::store::FlashStore::new(flash, LAYOUT) else {
        return 2;
    };
    let dev = Devices::<Mps2> {
        source,
        capture: FileCapture::open(),
        radio,
        alarm: InstantAlarm,
        storage,
        battery: FixedBattery(3_300),
        watchdog: CountingWatchdog::default(),
        power: PowerFlag::default(),
        delay: SpinDelay,
    };
    let mut node = Node::new(dev, core);
    let st = node.status();
    semihosting::eprintln!(
        "config: {:?}, counter {}, node {:?}, band {:?} (bits {:08x} {:08x}), {} blocks of {} per record",
        node.config_source(),
        node.counter(),
        node.node_id(),
        st.band_source,
        st.band_hz[0].to_bits(),
        st.band_hz[1].to_bits(),
        node.blocks_wanted(),
        BLOCK_LEN
    );
    // instruction counts per state (meaningful only under QEMU_ICOUNT=1)
    let count = semihosting::fs::File::open(c"count-instructions").is_ok();
    ticks::start();
    let (mut acq_sum, mut acq_n, mut acq_max, mut fin_max) = (0u64, 0u64, 0u64, 0u64);
    // the same for band-survey (commissioning) blocks
    let (mut sv_sum, mut sv_n, mut sv_max, mut sv_fin) = (0u64, 0u64, 0u64, 0u64);
    let mut acq_max_at = 0u32;
    let mut cycles = 0u32;
    while node.devices().source.remaining_blocks() >= node.blocks_wanted() {
        let result = loop {
            let from = node.state();
            let t0 = ticks::now();
            let r = node.step();
            let n = ticks::instructions(t0, ticks::now());
            let survey = node.summary().kind == CycleKind::Survey;
            match from {
                State::Acquire if survey => {
                    sv_sum += n;
                    sv_n += 1;
                    sv_max = sv_max.max(n);
                }
                State::Finish if survey => sv_fin = sv_fin.max(n),
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
                    "cycle {}: {} blocks, {} edges, flags {:#04x}, fed {}, downlink {:?}, kind {:?}",
                    cycles,
                    s.blocks,
                    s.edges,
                    wire::overall::flag_byte(s.flags),
                    s.fed_watchdog,
                    node.downlink(),
                    s.kind
                );
                let st = node.status();
                // integers only: float formatting would add ~20 KB of flash
                semihosting::eprintln!(
                    "status {}: counter {}, last downlink {:?}, refused {}, survey {:?}, band {:?} {}-{} Hz (bits {:08x} {:08x}), kurtosis x100 {}",
                    cycles,
                    st.downlink_counter,
                    st.last_downlink,
                    st.refused_downlinks,
                    st.survey,
                    st.band_source,
                    dsp_core::num::f32_to_u32_sat(st.band_hz[0]),
                    dsp_core::num::f32_to_u32_sat(st.band_hz[1]),
                    st.band_hz[0].to_bits(),
                    st.band_hz[1].to_bits(),
                    wire::frame::status::kurtosis_encode(st.band_kurtosis)
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
    if count && sv_n > 0 {
        semihosting::eprintln!(
            "band survey instructions per {}-sample block (incl. the semihosting read): mean {}, max {}; finish step {}",
            BLOCK_LEN,
            sv_sum / sv_n,
            sv_max,
            sv_fin
        );
    }
    if cycles == 0 {
        return 3;
    }
    0
}
