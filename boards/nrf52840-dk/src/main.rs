//! envord node on the nRF52840 DK.
//!
//! Sampling chain, all in hardware once started (nRF52840 PS, PPI chapter):
//!
//! ```text
//! TIMER1 (16 MHz, CC0 = 16e6/fs, clear on compare) ──PPI0──► SAADC SAMPLE
//!                                                   └─fork──► TIMER2 COUNT   (sample clock)
//! SAADC END ──PPI1──► SAADC START (EasyDMA double buffer)
//!           └─fork──► TIMER3 COUNT (blocks done)
//!           └─IRQ───► copy of the finished half into the block ring (6 blocks)
//! tach GPIOTE IN0 ──PPI2──► TIMER2 CAPTURE1 (edge time in samples: same time base)
//! ```
//!
//! The cycle takes blocks from the ring (`firmware::ring`), so one block may
//! take up to 7 block times (the one that completes a spectrum segment runs
//! the 4096-point transform) without losing samples.
//!
//! Pins (DK): AIN0 = P0.02 sensor signal, P0.03 tach input, P0.28 sensor
//! power switch, button 1 (P0.11) asks for a measurement. Radio: BLE
//! non-connectable advertising of the frame, raw RADIO registers. Storage:
//! the last five flash pages, power-safe (src/storage.rs). Logs: defmt over RTT.
#![no_std]
#![no_main]

mod ble;
mod sampling;
mod sleep;
mod storage;

use defmt_rtt as _;
use embassy_nrf::gpio::{Level, Output, OutputDrive};
use embassy_nrf::{bind_interrupts, config, saadc, wdt};
use firmware::cycle::{Devices, Node};
use firmware::hal::Watchdog;
use firmware::pipeline_core::NodeCore;
use panic_probe as _;

/// Node id of frames until an identity is provisioned (an unprovisioned
/// node refuses every downlink; the provisioned node id replaces this).
const NODE_ID: u16 = 0;

// Ours first: it services the DMA and clears END/STARTED, so embassy's
// handler (required by `Saadc::new`) finds nothing to do.
bind_interrupts!(struct Irqs {
    SAADC => sampling::SampleIrq, saadc::InterruptHandler;
});

/// The hardware watchdog, fed only after a healthy cycle.
struct Wdt(wdt::WatchdogHandle);
impl Watchdog for Wdt {
    fn feed(&mut self) {
        self.0.pet();
    }
}

/// Busy-wait delay at the 64 MHz core clock (settling only; the node sleeps
/// through the interval with the RTC).
struct SpinDelay;
impl embedded_hal::delay::DelayNs for SpinDelay {
    fn delay_ns(&mut self, ns: u32) {
        cortex_m::asm::delay(ns.saturating_mul(64) / 1000);
    }
}

/// The nRF52840 DK as the firmware's board: one module per peripheral.
struct Dk;
impl firmware::hal::Board for Dk {
    type Source = sampling::SaadcSource;
    type Capture = sampling::TachCapture;
    type Radio = ble::Advertiser;
    type Alarm = sleep::RtcAlarm;
    type Storage = storage::FlashStorage;
    type Battery = sampling::VddMonitor;
    type Watchdog = Wdt;
    type Power = Output<'static>;
    type Delay = SpinDelay;
}

#[cortex_m_rt::entry]
fn main() -> ! {
    let mut cfg = config::Config::default();
    // crystal clocks: the sample rate and the RTC interval depend on them
    cfg.hfclk_source = config::HfclkSource::ExternalXtal;
    cfg.lfclk_source = config::LfclkSource::ExternalXtal;
    let p = embassy_nrf::init(cfg);
    let Some(mut cp) = cortex_m::Peripherals::take() else {
        panic!("core peripherals taken twice");
    };
    // events of masked interrupts wake WFE: sampling, sleep and radio poll this way
    cp.SCB.set_sevonpend();
    sampling::init_pins();

    // 12-bit single-ended on AIN0, gain 1/6 with the 0.6 V reference: 0..3.6 V
    let ch = saadc::ChannelConfig::single_ended(p.P0_02);
    let adc = saadc::Saadc::new(p.SAADC, Irqs, saadc::Config::default(), [ch]);

    let mut wcfg = wdt::Config::default();
    wcfg.timeout_ticks = 32_768 * 120; // 2 min of running time per cycle
    wcfg.action_during_sleep = wdt::SleepConfig::Pause; // interval sleep does not count
    let (_wdt, [handle]) = match wdt::Watchdog::try_new(p.WDT, wcfg) {
        Ok(x) => x,
        Err(_) => {
            defmt::error!("watchdog already running with another configuration");
            loop {
                cortex_m::asm::wfe();
            }
        }
    };

    let dev = Devices::<Dk> {
        source: sampling::SaadcSource::new(adc),
        capture: sampling::TachCapture::new(),
        radio: ble::Advertiser::new(),
        alarm: sleep::RtcAlarm::new(),
        storage: match storage::new(embassy_nrf::nvmc::Nvmc::new(p.NVMC)) {
            Ok(s) => s,
            Err(e) => {
                defmt::error!("flash store: {}", e);
                loop {
                    cortex_m::asm::wfe();
                }
            }
        },
        battery: sampling::VddMonitor,
        watchdog: Wdt(handle),
        power: Output::new(p.P0_28, Level::Low, OutputDrive::Standard),
        delay: SpinDelay,
    };
    // the pipeline core (~53 KiB with its band survey; the pipeline is
    // configured in place by each cycle) in .bss, not on the stack
    let Some(core) = cortex_m::singleton!(: NodeCore = NodeCore::new(NODE_ID)) else {
        panic!("core taken twice");
    };
    let mut node = Node::new(dev, core);
    defmt::info!(
        "envord nRF52840 DK: node {}, config {}, downlink counter {}",
        node.node_id(),
        node.config_source(),
        node.counter()
    );
    // the sampling chain runs at a fixed 25.6 kHz with tach ticks in samples
    let c = node.config();
    if c.sample_rate_hz != sampling::SAMPLE_RATE_HZ || c.tach_tick_hz != sampling::SAMPLE_RATE_HZ {
        defmt::error!(
            "configuration expects {} Hz sampling / {} Hz tach ticks; this board gives {} Hz for both",
            c.sample_rate_hz,
            c.tach_tick_hz,
            sampling::SAMPLE_RATE_HZ
        );
    }
    loop {
        match node.run_cycle() {
            Ok(s) => defmt::info!("cycle done: {}", s),
            Err(e) => defmt::warn!("cycle aborted: {}", e),
        }
    }
}
