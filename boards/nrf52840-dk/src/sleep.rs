//! Low-power sleep between measurements: RTC2 compare or button 1 wakes the
//! CPU from WFE (System ON, HFXO stopped; events reach WFE through SEVONPEND
//! with the interrupts masked in the NVIC).

use embassy_nrf::interrupt::InterruptExt;
use embassy_nrf::pac;
use firmware::hal::{Alarm, WakeReason};

/// RTC2 at 8 Hz (prescaler 4095): a 24-bit counter spans 24 days.
const RTC_HZ: u32 = 8;

/// The interval alarm.
pub struct RtcAlarm;

impl RtcAlarm {
    /// Starts RTC2 (LFCLK already running from `embassy_nrf::init`).
    pub fn new() -> Self {
        let r = pac::RTC2;
        r.tasks_stop().write_value(1);
        r.prescaler().write(|w| w.0 = 32_768 / RTC_HZ - 1);
        r.tasks_clear().write_value(1);
        r.tasks_start().write_value(1);
        embassy_nrf::interrupt::RTC2.disable();
        embassy_nrf::interrupt::GPIOTE.disable();
        Self
    }
}

impl Alarm for RtcAlarm {
    fn sleep(&mut self, seconds: u32) -> WakeReason {
        let r = pac::RTC2;
        let now = r.counter().read().0;
        let ticks = seconds.saturating_mul(RTC_HZ).min(0x00FF_FFFF);
        r.cc(0)
            .write(|w| w.0 = now.wrapping_add(ticks) & 0x00FF_FFFF);
        r.events_compare(0).write_value(0);
        r.evtenset().write(|w| w.0 = 1 << 16);
        r.intenset().write(|w| w.0 = 1 << 16);
        let g = pac::GPIOTE;
        g.events_in(1).write_value(0);
        g.intenset(0).write(|w| w.0 = 1 << 1);
        // stop the crystal oscillator while asleep; the RTC runs on LFCLK
        let clock = pac::CLOCK;
        clock.tasks_hfclkstop().write_value(1);
        let reason = loop {
            if r.events_compare(0).read() != 0 {
                break WakeReason::Schedule;
            }
            if g.events_in(1).read() != 0 {
                break WakeReason::Command;
            }
            embassy_nrf::interrupt::RTC2.unpend();
            embassy_nrf::interrupt::GPIOTE.unpend();
            cortex_m::asm::wfe();
        };
        r.events_compare(0).write_value(0);
        g.events_in(1).write_value(0);
        r.intenclr().write(|w| w.0 = 1 << 16);
        g.intenclr(0).write(|w| w.0 = 1 << 1);
        embassy_nrf::interrupt::RTC2.unpend();
        embassy_nrf::interrupt::GPIOTE.unpend();
        // crystal back before sampling: the sample clock derives from it
        clock.events_hfclkstarted().write_value(0);
        clock.tasks_hfclkstart().write_value(1);
        while clock.events_hfclkstarted().read() == 0 {}
        reason
    }
}
