//! `envord energy`: the energy budget of one measurement and the cell's life
//! at given intervals, for a measuring point.
//!
//! * [`lora`]: LoRa time on air (Semtech's formula).
//! * [`hardware`]: every electrical and timing figure, with its default and
//!   the source of that default; a hardware file overrides them.
//! * [`budget`]: the arithmetic.
//!
//! The record length comes from the point (revolutions, speed, sample
//! rate), the CPU work from the measured QEMU instruction counts
//! (docs/benchmarks.md, or a fresh `boards/qemu-bench/run.sh --json` with
//! `--bench`), the frame lengths from the frame codec. Precedence of the
//! figures: defaults, then `--hardware`, then `--bench`, then `--cpi`.

pub mod budget;
pub mod hardware;
pub mod lora;

use std::path::{Path, PathBuf};

use clap::Args;
use dsp_core::config::SpeedInput;
use wire::exception::ReportPolicy;
use wire::frame::layout::{full_frame_len, REDUCED_LEN};

use crate::error::CliError;
use budget::{AtInterval, Cycle, Measurement};
use hardware::{Hardware, Origin, P};

/// The CPU share the issue asks for at one measurement per hour.
pub const CPU_SHARE_GOAL: f64 = 0.10;

/// Arguments of `envord energy`.
#[derive(Debug, Args)]
pub struct EnergyArgs {
    /// Measuring point (TOML point file); its `[report]` section gives the
    /// reports-by-exception policy.
    #[arg(long)]
    pub point: PathBuf,
    /// Interval between measurements: a number with s, min, h or d (e.g.
    /// 10min, 1h, 6h); repeat the option for several.
    #[arg(long = "interval", default_values = ["10min", "1h", "6h"])]
    pub intervals: Vec<String>,
    /// Spreading factor of the uplink.
    #[arg(long, default_value_t = 7)]
    pub sf: u8,
    /// Bandwidth of the uplink, kHz.
    #[arg(long, default_value_t = 125.0)]
    pub bw_khz: f64,
    /// Tach-shaft speed during the record, rpm. Default: `speed.rpm` of a
    /// constant-speed point, else `speed.min_rpm` (the longest record).
    #[arg(long)]
    pub rpm: Option<f64>,
    /// Electrical and timing figures (TOML) over the documented defaults;
    /// `--list-parameters` prints them.
    #[arg(long)]
    pub hardware: Option<PathBuf>,
    /// CPU figures from a QEMU benchmark run (`boards/qemu-bench/run.sh --json`).
    #[arg(long)]
    pub bench: Option<PathBuf>,
    /// Cycles per instruction (overrides `mcu.cpi`).
    #[arg(long)]
    pub cpi: Option<f64>,
    /// Print JSON instead of tables.
    #[arg(long)]
    pub json: bool,
}

/// Why an `--interval` value was refused (the text names the option).
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum IntervalError {
    /// No unit of s, min, h or d.
    Unit(String),
    /// The number part is not a number.
    Number {
        /// The whole value.
        given: String,
        /// Its number part.
        num: String,
    },
    /// Zero, negative or not finite.
    NotPositive(String),
}

impl std::fmt::Display for IntervalError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Self::Unit(s) => write!(
                f,
                "--interval {s:?}: give a number with s, min, h or d (e.g. 10min, 1h, 6h)"
            ),
            Self::Number { given, num } => {
                write!(f, "--interval {given:?}: {num:?} is not a number")
            }
            Self::NotPositive(s) => write!(f, "--interval {s:?}: must be > 0"),
        }
    }
}

impl std::error::Error for IntervalError {}

/// Parses an interval: a positive number followed by s, min, h or d.
pub fn parse_interval(s: &str) -> Result<f64, IntervalError> {
    let t = s.trim();
    let split = t
        .find(|c: char| !(c.is_ascii_digit() || c == '.'))
        .unwrap_or(t.len());
    let (num, unit) = t.split_at(split);
    let scale = match unit.trim() {
        "s" => 1.0,
        "min" => 60.0,
        "h" => 3600.0,
        "d" => 86_400.0,
        _ => return Err(IntervalError::Unit(s.to_string())),
    };
    let v: f64 = num.parse().map_err(|_| IntervalError::Number {
        given: s.to_string(),
        num: num.to_string(),
    })?;
    if !(v.is_finite() && v > 0.0) {
        return Err(IntervalError::NotPositive(s.to_string()));
    }
    Ok(v * scale)
}

/// A human form of an interval in seconds.
pub fn interval_label(s: f64) -> String {
    if s >= 86_400.0 && s % 86_400.0 == 0.0 {
        format!("{} d", s / 86_400.0)
    } else if s >= 3600.0 && s % 3600.0 == 0.0 {
        format!("{} h", s / 3600.0)
    } else if s >= 60.0 && s % 60.0 == 0.0 {
        format!("{} min", s / 60.0)
    } else {
        format!("{s} s")
    }
}

/// Reads the CPU figures of a `run.sh --json` result into `hw`.
pub fn apply_bench(hw: &mut Hardware, path: &Path) -> Result<(), CliError> {
    let text = std::fs::read_to_string(path).map_err(|e| {
        CliError::input(
            path.display(),
            format!("cannot read benchmark results: {e}"),
        )
    })?;
    let v: serde_json::Value = serde_json::from_str(&text)
        .map_err(|e| CliError::input(path.display(), format!("not JSON: {e}")))?;
    let get = |key: &str| -> Result<f64, CliError> {
        v.get("results")
            .and_then(|r| r.as_array())
            .and_then(|rows| {
                rows.iter()
                    .find(|r| r.get("key").and_then(|k| k.as_str()) == Some(key))
            })
            .and_then(|r| r.get("value"))
            .and_then(serde_json::Value::as_f64)
            .ok_or_else(|| {
                CliError::input(
                    path.display(),
                    format!("results: no row `{key}` with a number `value` (expected `boards/qemu-bench/run.sh --json` output)"),
                )
            })
    };
    let origin = |key: &str| Origin::File(format!("{} `{key}`", path.display()));
    let set = |hw: &mut Hardware, p: P, v: f64, o: Origin| {
        hw.set(p, v, o)
            .map_err(|m| CliError::input(path.display(), m))
    };
    set(
        hw,
        P::InstrPerSample,
        get("pipeline_per_sample")?,
        origin("pipeline_per_sample"),
    )?;
    set(
        hw,
        P::InstrFinish,
        get("pipeline_finish")?,
        origin("pipeline_finish"),
    )?;
    let ring = get("ring_push")? + get("ring_pop")?;
    set(hw, P::InstrPerBlock, ring, origin("ring_push + ring_pop"))?;
    Ok(())
}

/// Everything `envord energy` prints.
#[derive(Debug, serde::Serialize)]
pub struct EnergyReport {
    /// The point file.
    pub point: String,
    /// Record: revolutions.
    pub revolutions: f64,
    /// Record: speed, rpm.
    pub rpm: f64,
    /// Where the speed came from.
    pub rpm_from: String,
    /// Record: sample rate, Hz.
    pub sample_rate_hz: f64,
    /// Record: samples (whole blocks).
    pub samples: f64,
    /// Bearings in the full frame.
    pub bearings: usize,
    /// Application payload of the full frame, bytes.
    pub full_frame_bytes: usize,
    /// Application payload of the reduced frame, bytes.
    pub reduced_frame_bytes: usize,
    /// Uplink spreading factor.
    pub sf: u8,
    /// Uplink bandwidth, Hz.
    pub bw_hz: u32,
    /// The cycle sending a full frame.
    pub full: Cycle,
    /// The cycle sending a reduced frame.
    pub reduced: Cycle,
    /// Reports-by-exception policy of the point.
    pub full_every: u16,
    /// Its margin, dB.
    pub margin_db: f32,
    /// Per interval: a full frame every cycle.
    pub every_cycle: Vec<AtInterval>,
    /// Per interval: by exception with no finding changing (one full frame
    /// in `full_every`).
    pub by_exception: Vec<AtInterval>,
    /// Instructions per input sample that give the goal's CPU share at 1 h.
    pub instr_per_sample_for_goal_1h: Option<f64>,
    /// Cell: nominal capacity, mAh.
    pub cell_capacity_mah: f64,
    /// Cell: usable share, %.
    pub cell_usable_pct: f64,
    /// Cell: nominal voltage (energy = charge x this), V.
    pub cell_voltage_v: f64,
    /// Cell: self-discharge, % of nominal capacity per year.
    pub cell_self_discharge_pct_per_year: f64,
    /// Sleep current of the node, uA.
    pub sleep_ua: f64,
    /// Instructions per input sample in use.
    pub instr_per_sample: f64,
    /// Every parameter: key, value, unit, origin, source.
    pub parameters: Vec<serde_json::Value>,
}

/// Builds the budget.
pub fn build(a: &EnergyArgs) -> Result<EnergyReport, CliError> {
    let point = crate::point::load(&a.point)?;
    let policy: ReportPolicy = crate::report_policy::load(&a.point)?;
    let mut hw = match &a.hardware {
        Some(p) => Hardware::load(p)?,
        None => Hardware::default(),
    };
    if let Some(b) = &a.bench {
        apply_bench(&mut hw, b)?;
    }
    if let Some(c) = a.cpi {
        hw.set(P::Cpi, c, Origin::Option("--cpi"))
            .map_err(|m| CliError::input("--cpi", m))?;
    }
    let (rpm, rpm_from) = match (a.rpm, &point.speed) {
        (Some(r), _) => (r, "--rpm".to_string()),
        (None, SpeedInput::Constant { rpm }) => (f64::from(*rpm), "speed.rpm".to_string()),
        (None, SpeedInput::Tach { .. }) => (
            f64::from(point.min_rpm),
            "speed.min_rpm (the longest record; --rpm for the running speed)".to_string(),
        ),
    };
    if !(rpm.is_finite() && rpm > 0.0) {
        return Err(CliError::input("--rpm", format!("{rpm}: must be > 0")));
    }
    let m = Measurement {
        sample_rate_hz: f64::from(point.sample_rate_hz),
        revolutions: f64::from(point.revolutions),
        rpm,
        block_samples: dsp_core::pipeline::ADC_BLOCK,
    };
    let bw_hz = lora::BANDWIDTHS_HZ
        .iter()
        .copied()
        .find(|&b| (f64::from(b) - a.bw_khz * 1000.0).abs() < 100.0)
        .ok_or_else(|| {
            CliError::input(
                "--bw-khz",
                format!(
                    "{} kHz is not a LoRa bandwidth (7.8, 10.4, 15.6, 20.8, 31.25, 41.7, 62.5, 125, 250, 500)",
                    a.bw_khz
                ),
            )
        })?;
    let bad = |e: budget::BudgetError| blame(&hw, &e);
    let up = budget::uplink_params(&hw, a.sf, bw_hz).map_err(bad)?;
    let nb = point.bearings.len();
    let full = budget::cycle(&m, &hw, &up, full_frame_len(nb)).map_err(bad)?;
    let reduced = budget::cycle(&m, &hw, &up, REDUCED_LEN).map_err(bad)?;
    let mut every_cycle = Vec::new();
    let mut by_exception = Vec::new();
    let share = 1.0 / f64::from(policy.full_every.max(1));
    for s in &a.intervals {
        let t = parse_interval(s).map_err(|e| CliError::Input(e.to_string()))?;
        let key = format!("--interval {s}");
        every_cycle.push(
            budget::at_interval(&hw, &full, &reduced, 1.0, t)
                .map_err(|e| CliError::input(&key, e))?,
        );
        by_exception.push(
            budget::at_interval(&hw, &full, &reduced, share, t)
                .map_err(|e| CliError::input(&key, e))?,
        );
    }
    let parameters = hw
        .rows()
        .map(|(d, v, o)| {
            serde_json::json!({
                "key": d.key, "value": v, "unit": d.unit,
                "origin": origin_text(o), "source": d.source,
            })
        })
        .collect();
    Ok(EnergyReport {
        point: a.point.display().to_string(),
        revolutions: m.revolutions,
        rpm,
        rpm_from,
        sample_rate_hz: m.sample_rate_hz,
        samples: m.samples(),
        bearings: nb,
        full_frame_bytes: full_frame_len(nb),
        reduced_frame_bytes: REDUCED_LEN,
        sf: a.sf,
        bw_hz,
        instr_per_sample_for_goal_1h: budget::instr_per_sample_for_share(
            &m,
            &hw,
            &full,
            3600.0,
            CPU_SHARE_GOAL,
        ),
        full,
        reduced,
        full_every: policy.full_every,
        margin_db: policy.margin_db,
        every_cycle,
        by_exception,
        cell_capacity_mah: hw.get(P::CapacityMah),
        cell_usable_pct: hw.get(P::UsablePct),
        cell_voltage_v: hw.get(P::CellV),
        cell_self_discharge_pct_per_year: hw.get(P::SelfDischarge),
        sleep_ua: budget::sleep_ua(&hw),
        instr_per_sample: hw.get(P::InstrPerSample),
        parameters,
    })
}

/// A budget error as bad input, naming the file a parameter came from.
fn blame(hw: &Hardware, e: &budget::BudgetError) -> CliError {
    let key = match e {
        budget::BudgetError::Radio { key, .. } | budget::BudgetError::NotWhole(key) => Some(*key),
        _ => None,
    };
    let from = key.and_then(|k| {
        hw.rows()
            .find(|(d, _, _)| d.key == k)
            .map(|(_, _, o)| o.clone())
    });
    match from {
        Some(Origin::File(f)) => CliError::input(f, e),
        _ => CliError::Input(e.to_string()),
    }
}

fn origin_text(o: &Origin) -> String {
    match o {
        Origin::Default => "default".into(),
        Origin::File(f) => f.clone(),
        Origin::Option(k) => (*k).into(),
    }
}

fn ms(s: f64) -> String {
    format!("{:.1} ms", s * 1000.0)
}

/// The text form.
pub fn render(r: &EnergyReport) -> String {
    use std::fmt::Write as _;
    let volts = r.cell_voltage_v;
    let mut o = String::new();
    let f = &r.full;
    let record_s = r.samples / r.sample_rate_hz;
    let _ = writeln!(o, "energy budget of one measurement: {}", r.point);
    let _ = writeln!(
        o,
        "  record: {} revolutions at {} rpm ({}) = {:.3} s at {} Hz, {} samples",
        r.revolutions, r.rpm, r.rpm_from, record_s, r.sample_rate_hz, r.samples
    );
    let _ = writeln!(
        o,
        "  CPU: {:.1} M instructions while sampling ({:.1} % of real time) + {:.2} M at the end of the record",
        f.instr_sampling / 1e6,
        f.realtime_load * 100.0,
        f.instr_finish / 1e6
    );
    let _ = writeln!(
        o,
        "  uplink: full frame {} B, reduced {} B, + LoRaWAN framing = {} / {} B on air at SF{} / {} kHz: {} / {}",
        r.full_frame_bytes,
        r.reduced_frame_bytes,
        f.phy_bytes,
        r.reduced.phy_bytes,
        r.sf,
        f64::from(r.bw_hz) / 1000.0,
        ms(f.toa_s),
        ms(r.reduced.toa_s)
    );
    if f.realtime_load >= 1.0 {
        let _ = writeln!(
            o,
            "  WARNING: the CPU needs {:.0} % of real time while sampling: blocks would be lost",
            f.realtime_load * 100.0
        );
    }
    let _ = writeln!(o);
    let _ = writeln!(
        o,
        "{:<44} {:>10} {:>9} {:>10} {:>9}",
        "one measurement, full frame", "time", "current", "charge", "energy"
    );
    for i in &f.items {
        let _ = writeln!(
            o,
            "  {:<42} {:>10} {:>6.2} mA {:>6.3} mAs {:>6.2} mJ",
            i.name,
            ms(i.time_s),
            i.current_ma,
            i.charge_mas,
            i.charge_mas * volts
        );
    }
    let _ = writeln!(
        o,
        "  {:<42} {:>10} {:>9} {:>6.3} mAs {:>6.2} mJ  (CPU {:.1} %, radio {:.1} % of it)",
        "total awake",
        ms(f.awake_s),
        "",
        f.charge_mas(),
        f.charge_mas() * volts,
        f.cpu_mas() / f.charge_mas() * 100.0,
        radio_mas(f) / f.charge_mas() * 100.0
    );
    let _ = writeln!(
        o,
        "  reduced frame instead: {:.3} mAs ({:.3} mAs less)",
        r.reduced.charge_mas(),
        f.charge_mas() - r.reduced.charge_mas()
    );
    let _ = writeln!(o);
    let _ = writeln!(
        o,
        "cell: {} mAh x {} % usable, {volts} V, self-discharge {} %/year; asleep {:.2} uA",
        r.cell_capacity_mah, r.cell_usable_pct, r.cell_self_discharge_pct_per_year, r.sleep_ua
    );
    let _ = writeln!(
        o,
        "{:<8} {:>11} {:>11} {:>10} {:>7} {:>7} {:>7} {:>9}   {:>9} {:>7}",
        "interval",
        "per cycle",
        "asleep",
        "average",
        "CPU",
        "radio",
        "sleep",
        "life",
        "life, by",
        "CPU"
    );
    let _ = writeln!(
        o,
        "{:<8} {:>11} {:>11} {:>10} {:>7} {:>7} {:>7} {:>9}   {:>9} {:>7}",
        "", "", "", "current", "share", "share", "share", "", "exception", "share"
    );
    for (a, e) in r.every_cycle.iter().zip(&r.by_exception) {
        let _ = writeln!(
            o,
            "{:<8} {:>7.2} mJ {:>8.2} mJ {:>7.2} uA {:>6.1}% {:>6.1}% {:>6.1}% {:>7.2} y   {:>7.2} y {:>6.1}%",
            interval_label(a.interval_s),
            a.cycle_mas * volts,
            a.sleep_mas * volts,
            a.average_ua,
            a.cpu_share * 100.0,
            a.radio_share * 100.0,
            a.sleep_share * 100.0,
            a.life_years,
            e.life_years,
            e.cpu_share * 100.0
        );
    }
    let _ = writeln!(
        o,
        "  (by exception: no finding changing, one full frame in {} cycles, margin {} dB; [report] of the point)",
        r.full_every, r.margin_db
    );
    let today = r.instr_per_sample;
    if let Some(h) = r.every_cycle.iter().find(|a| a.interval_s == 3600.0) {
        let _ = writeln!(
            o,
            "goal: CPU share below {:.0} % at one measurement per hour: {:.1} % with {today} instructions per input sample: {}",
            CPU_SHARE_GOAL * 100.0,
            h.cpu_share * 100.0,
            if h.cpu_share < CPU_SHARE_GOAL { "met" } else { "missed" }
        );
    }
    match r.instr_per_sample_for_goal_1h {
        Some(x) => {
            let _ = writeln!(
                o,
                "  at 1 h the share is {:.0} % at {x:.1} instructions per input sample (every other figure as above)",
                CPU_SHARE_GOAL * 100.0
            );
        }
        None => {
            let _ = writeln!(
                o,
                "  at 1 h the fixed CPU work alone exceeds {:.0} %",
                CPU_SHARE_GOAL * 100.0
            );
        }
    }
    let _ = writeln!(o);
    let _ = writeln!(o, "parameters (value, origin; source of the default)");
    for p in &r.parameters {
        let _ = writeln!(
            o,
            "  {:<34} {:>12} {:<12} {:<8} {}",
            p["key"].as_str().unwrap_or(""),
            p["value"]
                .as_f64()
                .map_or(String::new(), |v| format!("{v}")),
            p["unit"].as_str().unwrap_or(""),
            p["origin"].as_str().unwrap_or(""),
            p["source"].as_str().unwrap_or("")
        );
    }
    o
}

fn radio_mas(c: &Cycle) -> f64 {
    c.items
        .iter()
        .filter(|i| i.name.starts_with("radio"))
        .map(|i| i.charge_mas)
        .sum()
}

/// Runs `envord energy`.
pub fn run(a: &EnergyArgs) -> Result<(), CliError> {
    let r = build(a)?;
    if a.json {
        let s = serde_json::to_string_pretty(&r).map_err(|e| CliError::Other(e.to_string()))?;
        println!("{s}");
        return Ok(());
    }
    print!("{}", render(&r));
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn intervals_parse_and_refuse_with_the_option_named() {
        assert_eq!(parse_interval("10min").unwrap(), 600.0);
        assert_eq!(parse_interval("1h").unwrap(), 3600.0);
        assert_eq!(parse_interval("6 h").unwrap(), 21_600.0);
        assert_eq!(parse_interval("1.5d").unwrap(), 129_600.0);
        assert_eq!(parse_interval("90s").unwrap(), 90.0);
        for bad in ["10", "h", "-1h", "1w", "0h", "1..2h"] {
            let e = parse_interval(bad).unwrap_err().to_string();
            assert!(e.starts_with("--interval"), "{bad}: {e}");
        }
        assert_eq!(interval_label(600.0), "10 min");
        assert_eq!(interval_label(21_600.0), "6 h");
        assert_eq!(interval_label(90.0), "90 s");
    }
}
