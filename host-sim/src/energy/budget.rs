//! The arithmetic of the energy budget: charge per measurement cycle, per
//! interval, and the cell's life.
//!
//! Charge is counted in mA s (current x time, currents as drawn from the
//! cell); energy is charge x the cell's nominal voltage. One cycle is:
//! sensor power-on and settling, sampling (sensor, converter and clocks on,
//! the CPU running the pipeline on each block), the end-of-record work
//! (defect search and report), the uplink and the two LoRaWAN receive
//! windows; the node sleeps for the rest of the interval. The CPU's run
//! current is added on top of the sampling current while it works (a small
//! double count of the clock, on the safe side).

use core::fmt;

use super::hardware::{Hardware, P};
use super::lora::{self, LoraError, LoraParams};

/// Seconds in a year of 365.25 days.
pub const YEAR_S: f64 = 365.25 * 86_400.0;

/// Shortest and longest measurement interval the node accepts (s): the
/// range `PointRecord::validate` checks (wire/src/config.rs).
pub const INTERVAL_RANGE_S: (f64, f64) = (10.0, 7.0 * 86_400.0);

/// Delay of the second receive window after the end of the uplink, s
/// (LoRaWAN RECEIVE_DELAY2 default; common practice). The node sleeps
/// through the delays; the interval must hold them.
pub const RX2_DELAY_S: f64 = 2.0;

/// What one measurement records and sends.
#[derive(Clone, Debug, PartialEq)]
pub struct Measurement {
    /// ADC sample rate, Hz.
    pub sample_rate_hz: f64,
    /// Record length in tach-shaft revolutions.
    pub revolutions: f64,
    /// Tach-shaft speed, rpm.
    pub rpm: f64,
    /// Samples per ADC block (the node's DMA block).
    pub block_samples: usize,
}

impl Measurement {
    /// Length of the record, s.
    pub fn record_s(&self) -> f64 {
        self.revolutions * 60.0 / self.rpm
    }

    /// Samples in the record (whole blocks: the node stops after the block
    /// that completes it).
    pub fn samples(&self) -> f64 {
        self.blocks() * self.block_len()
    }

    /// ADC blocks in the record.
    pub fn blocks(&self) -> f64 {
        (self.record_s() * self.sample_rate_hz / self.block_len()).ceil()
    }

    fn block_len(&self) -> f64 {
        f64::from(u32::try_from(self.block_samples.max(1)).unwrap_or(u32::MAX))
    }
}

/// Why a budget cannot be made.
#[derive(Clone, Debug, PartialEq)]
pub enum BudgetError {
    /// A radio setting is invalid (the key or option named).
    Radio {
        /// Key or option.
        key: &'static str,
        /// What is wrong.
        error: LoraError,
    },
    /// A parameter that must be a whole number is not.
    NotWhole(&'static str),
    /// The record is empty or not finite (speed, revolutions, sample rate).
    Record(String),
    /// The interval does not hold one cycle, or is outside the node's range.
    Interval {
        /// Interval asked for, s.
        interval_s: f64,
        /// Why it is refused.
        why: String,
    },
}

impl fmt::Display for BudgetError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Radio { key, error } => write!(f, "{key}: {error}"),
            Self::NotWhole(key) => write!(f, "{key}: must be a whole number"),
            Self::Record(m) => f.write_str(m),
            Self::Interval { interval_s, why } => write!(f, "interval of {interval_s} s: {why}"),
        }
    }
}

impl std::error::Error for BudgetError {}

/// One line of the budget.
#[derive(Clone, Debug, PartialEq, serde::Serialize)]
pub struct Item {
    /// What draws the current.
    pub name: String,
    /// How long, s.
    pub time_s: f64,
    /// Current, mA.
    pub current_ma: f64,
    /// Charge, mA s.
    pub charge_mas: f64,
    /// Counted as CPU work.
    pub cpu: bool,
}

impl Item {
    fn new(name: impl Into<String>, time_s: f64, current_ma: f64, cpu: bool) -> Self {
        Self {
            name: name.into(),
            time_s,
            current_ma,
            charge_mas: time_s * current_ma,
            cpu,
        }
    }
}

/// One measurement cycle, without the sleep.
#[derive(Clone, Debug, PartialEq, serde::Serialize)]
pub struct Cycle {
    /// The lines, in the order the cycle runs them.
    pub items: Vec<Item>,
    /// Instructions while sampling.
    pub instr_sampling: f64,
    /// Instructions after sampling (finish).
    pub instr_finish: f64,
    /// CPU time while sampling over the record's real time (1 = no margin).
    pub realtime_load: f64,
    /// Uplink PHY payload, bytes.
    pub phy_bytes: usize,
    /// Uplink time on air, s.
    pub toa_s: f64,
    /// Time the node is awake (settling, sampling, finish, radio), s.
    pub awake_s: f64,
}

impl Cycle {
    /// Charge of the whole cycle, mA s.
    pub fn charge_mas(&self) -> f64 {
        self.items.iter().map(|i| i.charge_mas).sum()
    }

    /// Charge of the CPU lines, mA s.
    pub fn cpu_mas(&self) -> f64 {
        self.items
            .iter()
            .filter(|i| i.cpu)
            .map(|i| i.charge_mas)
            .sum()
    }
}

fn whole(hw: &Hardware, p: P) -> Result<u32, BudgetError> {
    let v = hw.get(p);
    if v.fract() != 0.0 || !(0.0..=f64::from(u32::MAX)).contains(&v) {
        return Err(BudgetError::NotWhole(p.def().key));
    }
    // checked whole and in range just above
    #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
    Ok(v as u32)
}

fn small(hw: &Hardware, p: P) -> Result<u8, BudgetError> {
    u8::try_from(whole(hw, p)?).map_err(|_| BudgetError::NotWhole(p.def().key))
}

/// The RX2 window's modulation.
fn rx2_params(hw: &Hardware) -> Result<LoraParams, BudgetError> {
    let sf = small(hw, P::Rx2Sf)?;
    let bw_khz = hw.get(P::Rx2BwKhz);
    let bw = lora::BANDWIDTHS_HZ
        .iter()
        .copied()
        .find(|&b| (f64::from(b) - bw_khz * 1000.0).abs() < 100.0)
        .ok_or(BudgetError::Radio {
            key: "radio.rx2_bw_khz",
            error: LoraError::Bandwidth(whole_hz(bw_khz)),
        })?;
    Ok(LoraParams::lorawan_uplink(sf, bw))
}

fn whole_hz(khz: f64) -> u32 {
    let hz = (khz * 1000.0).round().clamp(0.0, f64::from(u32::MAX));
    // clamped to the u32 range just above
    #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
    let n = hz as u32;
    n
}

/// The uplink's modulation from the hardware figures and the chosen SF/BW.
pub fn uplink_params(hw: &Hardware, sf: u8, bw_hz: u32) -> Result<LoraParams, BudgetError> {
    let mut p = LoraParams::lorawan_uplink(sf, bw_hz);
    p.coding_rate = small(hw, P::CodingRate)?;
    p.preamble_symbols = u16::try_from(whole(hw, P::Preamble)?)
        .map_err(|_| BudgetError::NotWhole("radio.preamble_symbols"))?;
    p.validate().map_err(|error| BudgetError::Radio {
        key: match error {
            LoraError::SpreadingFactor(_) => "--sf",
            LoraError::Bandwidth(_) => "--bw-khz",
            LoraError::CodingRate(_) => "radio.coding_rate",
            LoraError::Payload(_) => "frame",
        },
        error,
    })?;
    Ok(p)
}

/// Charge of one cycle that sends an application payload of `app_bytes`.
pub fn cycle(
    m: &Measurement,
    hw: &Hardware,
    uplink: &LoraParams,
    app_bytes: usize,
) -> Result<Cycle, BudgetError> {
    let ok = |x: f64| x.is_finite() && x > 0.0;
    if !(ok(m.sample_rate_hz) && ok(m.revolutions) && ok(m.rpm)) {
        return Err(BudgetError::Record(format!(
            "record of {} revolutions at {} rpm and {} Hz: all must be finite and > 0",
            m.revolutions, m.rpm, m.sample_rate_hz
        )));
    }
    let hz = hw.get(P::ClockMhz) * 1e6 / hw.get(P::Cpi);
    let record_s = m.samples() / m.sample_rate_hz;
    let instr_sampling =
        m.samples() * hw.get(P::InstrPerSample) + m.blocks() * hw.get(P::InstrPerBlock);
    let instr_finish = hw.get(P::InstrFinish);
    let cpu_sampling_s = instr_sampling / hz;
    let cpu_finish_s = instr_finish / hz;
    let settle_s = hw.get(P::SettleMs) / 1000.0;
    let overhead = usize::try_from(whole(hw, P::MacOverhead)?).unwrap_or(usize::MAX);
    let phy_bytes = app_bytes.saturating_add(overhead);
    let toa_s = lora::time_on_air_s(uplink, phy_bytes).map_err(|error| BudgetError::Radio {
        key: "frame",
        error,
    })?;
    let rx1_s = f64::from(whole(hw, P::Rx1Symbols)?) * uplink.symbol_s();
    let rx2 = rx2_params(hw)?;
    let rx2_s = f64::from(whole(hw, P::Rx2Symbols)?) * rx2.symbol_s();
    let bw_khz = f64::from(uplink.bw_hz) / 1000.0;
    let items = vec![
        Item::new(
            "sensor power-on and settling",
            settle_s,
            hw.get(P::SensorMa),
            false,
        ),
        Item::new(
            "sensor while sampling",
            record_s,
            hw.get(P::SensorMa),
            false,
        ),
        Item::new(
            "sampling (converter, DMA, clocks)",
            record_s,
            hw.get(P::SamplingMa),
            false,
        ),
        Item::new(
            "CPU: pipeline on each block",
            cpu_sampling_s,
            hw.get(P::RunMa),
            true,
        ),
        Item::new(
            "CPU: end of record (search, report)",
            cpu_finish_s,
            hw.get(P::RunMa),
            true,
        ),
        Item::new(
            format!(
                "radio: uplink, {phy_bytes} B at SF{} / {bw_khz} kHz",
                uplink.sf
            ),
            toa_s,
            hw.get(P::TxMa),
            false,
        ),
        Item::new(
            format!("radio: RX1 window, SF{}", uplink.sf),
            rx1_s,
            hw.get(P::RxMa),
            false,
        ),
        Item::new(
            format!("radio: RX2 window, SF{}", rx2.sf),
            rx2_s,
            hw.get(P::RxMa),
            false,
        ),
    ];
    Ok(Cycle {
        items,
        instr_sampling,
        instr_finish,
        realtime_load: cpu_sampling_s / record_s,
        phy_bytes,
        toa_s,
        awake_s: settle_s + record_s + cpu_finish_s + toa_s + rx1_s + rx2_s,
    })
}

/// The budget at one interval.
#[derive(Clone, Debug, PartialEq, serde::Serialize)]
pub struct AtInterval {
    /// Interval between measurements, s.
    pub interval_s: f64,
    /// Charge of the cycle (mixed full/reduced when by exception), mA s.
    pub cycle_mas: f64,
    /// Charge asleep over one interval, mA s.
    pub sleep_mas: f64,
    /// Charge over one interval, mA s.
    pub total_mas: f64,
    /// Average current, uA.
    pub average_ua: f64,
    /// CPU charge over the whole interval's charge.
    pub cpu_share: f64,
    /// Radio (uplink and windows) over the whole.
    pub radio_share: f64,
    /// Sleep over the whole.
    pub sleep_share: f64,
    /// Years until the usable capacity is spent, self-discharge included.
    pub life_years: f64,
}

/// Sleep current of the node (MCU, radio, board), uA.
pub fn sleep_ua(hw: &Hardware) -> f64 {
    hw.get(P::SleepUa) + hw.get(P::RadioSleepUa) + hw.get(P::QuiescentUa)
}

/// Years a cell lasts at an average current (uA), self-discharge included:
/// usable capacity / (consumption + self-discharge per year).
pub fn life_years(hw: &Hardware, average_ua: f64) -> f64 {
    let cap = hw.get(P::CapacityMah);
    let usable = cap * hw.get(P::UsablePct) / 100.0;
    let per_year_mah =
        average_ua / 1000.0 * YEAR_S / 3600.0 + cap * hw.get(P::SelfDischarge) / 100.0;
    if per_year_mah > 0.0 {
        usable / per_year_mah
    } else {
        f64::INFINITY
    }
}

/// The budget at `interval_s` when a share `full_share` (0..=1) of the
/// cycles sends `full` and the rest `reduced`.
pub fn at_interval(
    hw: &Hardware,
    full: &Cycle,
    reduced: &Cycle,
    full_share: f64,
    interval_s: f64,
) -> Result<AtInterval, BudgetError> {
    let (lo, hi) = INTERVAL_RANGE_S;
    if !(interval_s.is_finite() && (lo..=hi).contains(&interval_s)) {
        return Err(BudgetError::Interval {
            interval_s,
            why: format!("the node measures every {lo} s to {hi} s (firmware PointRecord)"),
        });
    }
    let f = full_share.clamp(0.0, 1.0);
    let mix = |a: f64, b: f64| f * a + (1.0 - f) * b;
    let awake = mix(full.awake_s, reduced.awake_s) + RX2_DELAY_S;
    if awake >= interval_s {
        return Err(BudgetError::Interval {
            interval_s,
            why: format!("one cycle takes {awake:.1} s (record, radio and receive delays)"),
        });
    }
    let cycle_mas = mix(full.charge_mas(), reduced.charge_mas());
    let radio = |c: &Cycle| -> f64 {
        c.items
            .iter()
            .filter(|i| i.name.starts_with("radio"))
            .map(|i| i.charge_mas)
            .sum()
    };
    let sleep_mas = sleep_ua(hw) / 1000.0 * (interval_s - mix(full.awake_s, reduced.awake_s));
    let total_mas = cycle_mas + sleep_mas;
    let average_ua = total_mas / interval_s * 1000.0;
    Ok(AtInterval {
        interval_s,
        cycle_mas,
        sleep_mas,
        total_mas,
        average_ua,
        cpu_share: mix(full.cpu_mas(), reduced.cpu_mas()) / total_mas,
        radio_share: mix(radio(full), radio(reduced)) / total_mas,
        sleep_share: sleep_mas / total_mas,
        life_years: life_years(hw, average_ua),
    })
}

/// The pipeline cost per input sample (instructions) at which the CPU share
/// of the budget at `interval_s` equals `share`, with every other figure
/// unchanged; `None` when even no per-sample work would not reach it.
pub fn instr_per_sample_for_share(
    m: &Measurement,
    hw: &Hardware,
    full: &Cycle,
    interval_s: f64,
    share: f64,
) -> Option<f64> {
    let hz = hw.get(P::ClockMhz) * 1e6 / hw.get(P::Cpi);
    let per_instr_mas = hw.get(P::RunMa) / hz;
    let cpu = full.cpu_mas();
    let other = full.charge_mas() - cpu + sleep_ua(hw) / 1000.0 * (interval_s - full.awake_s);
    let fixed = (m.blocks() * hw.get(P::InstrPerBlock) + hw.get(P::InstrFinish)) * per_instr_mas;
    let allowed = other * share / (1.0 - share) - fixed;
    (allowed > 0.0).then(|| allowed / (m.samples() * per_instr_mas))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn demo() -> Measurement {
        Measurement {
            sample_rate_hz: 51_200.0,
            revolutions: 256.0,
            rpm: 1500.0,
            block_samples: 256,
        }
    }

    /// Hand arithmetic of one cycle and one interval with round figures.
    #[test]
    fn budget_arithmetic_by_hand() {
        let mut hw = Hardware::default();
        let set = |hw: &mut Hardware, p: P, v: f64| {
            hw.set(p, v, super::super::hardware::Origin::Default)
                .unwrap()
        };
        set(&mut hw, P::InstrPerSample, 100.0);
        set(&mut hw, P::InstrPerBlock, 0.0);
        set(&mut hw, P::InstrFinish, 1_000_000.0);
        set(&mut hw, P::ClockMhz, 64.0);
        set(&mut hw, P::Cpi, 1.0);
        set(&mut hw, P::RunMa, 4.0);
        set(&mut hw, P::SensorMa, 2.0);
        set(&mut hw, P::SamplingMa, 1.0);
        set(&mut hw, P::SettleMs, 500.0);
        set(&mut hw, P::TxMa, 40.0);
        set(&mut hw, P::RxMa, 10.0);
        set(&mut hw, P::Rx1Symbols, 0.0);
        set(&mut hw, P::Rx2Symbols, 0.0);
        set(&mut hw, P::SleepUa, 4.0);
        set(&mut hw, P::RadioSleepUa, 0.0);
        set(&mut hw, P::QuiescentUa, 1.0);
        // 256 revolutions at 1500 rpm = 10.24 s = 524,288 samples = 2048 blocks exactly
        let m = demo();
        assert_eq!(m.samples(), 524_288.0);
        let up = uplink_params(&hw, 7, 125_000).unwrap();
        // 10 B application payload + 13 B = 23 B at SF7: 8 + ceil(200/28)*5 = 48 symbols,
        // (8 + 4.25 + 48) x 1.024 ms = 61.696 ms
        let c = cycle(&m, &hw, &up, 10).unwrap();
        assert_eq!(c.phy_bytes, 23);
        assert!((c.toa_s - 0.061_696).abs() < 1e-9, "{}", c.toa_s);
        let by = |name: &str| {
            c.items
                .iter()
                .find(|i| i.name.starts_with(name))
                .unwrap()
                .charge_mas
        };
        assert!((by("sensor power-on") - 1.0).abs() < 1e-12); // 0.5 s x 2 mA
        assert!((by("sensor while") - 20.48).abs() < 1e-9); // 10.24 s x 2 mA
        assert!((by("sampling") - 10.24).abs() < 1e-9); // 10.24 s x 1 mA
                                                        // 52.4288 M instructions / 64 MHz = 0.8192 s x 4 mA
        assert!((by("CPU: pipeline") - 3.2768).abs() < 1e-9);
        assert!((by("CPU: end") - 0.0625).abs() < 1e-9); // 1 M / 64 MHz x 4 mA
        assert!((by("radio: uplink") - 40.0 * 0.061_696).abs() < 1e-9);
        assert!((c.realtime_load - 0.08).abs() < 1e-12); // 0.8192 s of 10.24 s
        let active = 1.0 + 20.48 + 10.24 + 3.2768 + 0.0625 + 2.46784;
        assert!((c.charge_mas() - active).abs() < 1e-9);
        // one hour: sleep 5 uA over (3600 - awake) s
        let at = at_interval(&hw, &c, &c, 1.0, 3600.0).unwrap();
        let awake = 0.5 + 10.24 + 1e6 / 64e6 + 0.061_696;
        assert!((at.sleep_mas - 0.005 * (3600.0 - awake)).abs() < 1e-9);
        assert!((at.total_mas - (active + at.sleep_mas)).abs() < 1e-9);
        assert!((at.average_ua - at.total_mas / 3.6).abs() < 1e-9);
        assert!((at.cpu_share - 3.3393 / at.total_mas).abs() < 1e-9);
        // life: 2,600 mAh / (I x 8766 h + 1 % of 2,600 mAh per year)
        let want = 2_600.0 / (at.average_ua / 1000.0 * 8766.0 + 26.0);
        assert!(
            (at.life_years - want).abs() < 1e-9,
            "{} vs {want}",
            at.life_years
        );
        // the per-sample cost for exactly this share is the one used
        let ips = instr_per_sample_for_share(&m, &hw, &c, 3600.0, at.cpu_share).unwrap();
        assert!((ips - 100.0).abs() < 1e-6, "{ips}");
    }

    #[test]
    fn reduced_frames_mix_by_share() {
        let hw = Hardware::default();
        let up = uplink_params(&hw, 9, 125_000).unwrap();
        let full = cycle(&demo(), &hw, &up, 49).unwrap();
        let red = cycle(&demo(), &hw, &up, 11).unwrap();
        assert!(red.toa_s < full.toa_s);
        let a = at_interval(&hw, &full, &red, 1.0, 3600.0).unwrap();
        let b = at_interval(&hw, &full, &red, 0.0, 3600.0).unwrap();
        let h = at_interval(&hw, &full, &red, 0.5, 3600.0).unwrap();
        assert!((h.cycle_mas - (a.cycle_mas + b.cycle_mas) / 2.0).abs() < 1e-9);
        assert!(b.life_years > a.life_years);
    }

    #[test]
    fn bad_inputs_are_named() {
        let hw = Hardware::default();
        assert_eq!(
            uplink_params(&hw, 13, 125_000).unwrap_err().to_string(),
            "--sf: spreading factor 13 is not 6..=12"
        );
        assert!(uplink_params(&hw, 7, 100_000)
            .unwrap_err()
            .to_string()
            .starts_with("--bw-khz:"));
        let mut hw2 = Hardware::default();
        hw2.set(P::Rx2BwKhz, 100.0, super::super::hardware::Origin::Default)
            .unwrap();
        let up = uplink_params(&hw, 7, 125_000).unwrap();
        assert!(cycle(&demo(), &hw2, &up, 49)
            .unwrap_err()
            .to_string()
            .starts_with("radio.rx2_bw_khz:"));
        hw2 = Hardware::default();
        hw2.set(P::CodingRate, 5.5, super::super::hardware::Origin::Default)
            .unwrap();
        assert_eq!(
            uplink_params(&hw2, 7, 125_000).unwrap_err().to_string(),
            "radio.coding_rate: must be a whole number"
        );
        let c = cycle(&demo(), &hw, &up, 49).unwrap();
        let e = at_interval(&hw, &c, &c, 1.0, 5.0).unwrap_err().to_string();
        assert!(e.contains("every 10 s"), "{e}");
        // 14 s of cycle at SF7: a 12 s interval is in range but too short
        let e = at_interval(&hw, &c, &c, 1.0, 12.0).unwrap_err().to_string();
        assert!(e.contains("one cycle takes"), "{e}");
        let mut m = demo();
        m.rpm = 0.0;
        assert!(cycle(&m, &hw, &up, 49)
            .unwrap_err()
            .to_string()
            .contains("rpm"));
    }
}
