//! The node's electrical and timing figures for the energy budget: every
//! figure is a parameter with a documented default and where that default
//! comes from. A hardware file (TOML) overrides any of them:
//!
//! ```toml
//! [mcu]
//! run_ma = 6.3      # LDO instead of the DC/DC regulator
//! [cell]
//! capacity_mah = 8500
//! ```
//!
//! Unknown sections or keys, values that are not numbers and values out of
//! range are refused with the file and the key named.

use std::collections::BTreeMap;
use std::path::Path;

use crate::error::CliError;

/// One parameter: key, default, unit, allowed range, source of the default.
#[derive(Clone, Copy, Debug)]
pub struct ParamDef {
    /// `section.key` as written in a hardware file.
    pub key: &'static str,
    /// Default value.
    pub default: f64,
    /// Unit.
    pub unit: &'static str,
    /// Smallest accepted value.
    pub min: f64,
    /// Largest accepted value.
    pub max: f64,
    /// What the figure is and where the default comes from.
    pub source: &'static str,
}

macro_rules! params {
    ($( $id:ident = ($key:literal, $default:expr, $unit:literal, $min:expr, $max:expr, $source:literal); )*) => {
        /// A parameter of [`Hardware`].
        #[derive(Clone, Copy, Debug, PartialEq, Eq)]
        #[allow(missing_docs)]
        pub enum P { $( $id, )* }

        #[allow(non_upper_case_globals)]
        mod defs {
            use super::ParamDef;
            $( pub const $id: ParamDef = ParamDef { key: $key, default: $default, unit: $unit, min: $min, max: $max, source: $source }; )*
        }

        /// Every parameter, in [`P`] order.
        pub const PARAMS: &[ParamDef] = &[ $( defs::$id, )* ];

        const ALL: &[P] = &[ $( P::$id, )* ];

        impl P {
            /// Its definition.
            pub fn def(self) -> &'static ParamDef {
                match self { $( P::$id => &defs::$id, )* }
            }
        }
    };
}

params! {
    InstrPerSample = ("cpu.instr_per_sample", 178.06, "instr/sample", 1.0, 1e5,
        "whole node pipeline per input sample, QEMU mps2-an386 -icount (docs/benchmarks.md, qemu-bench `pipeline_per_sample`)");
    InstrPerBlock = ("cpu.instr_per_block", 1210.0, "instr/block", 0.0, 1e7,
        "sample ring copy in and out per 256-sample block, 617 + 593 (docs/benchmarks.md, `ring_push` + `ring_pop`)");
    InstrFinish = ("cpu.instr_finish", 881_884.0, "instr", 0.0, 1e10,
        "end of record: defect search and report (docs/benchmarks.md, `pipeline_finish`)");
    ClockMhz = ("mcu.clock_mhz", 64.0, "MHz", 1.0, 1000.0,
        "nRF52840 CPU clock (nRF52840 Product Specification, CPU section)");
    Cpi = ("mcu.cpi", 1.0, "cycles/instr", 0.5, 10.0,
        "assumption: one cycle per instruction, the lower bound QEMU counts give; FP latencies and flash wait states raise it (not measured)");
    RunMa = ("mcu.run_ma", 3.3, "mA", 0.0, 1000.0,
        "nRF52840 CPU running from flash at 64 MHz, DC/DC at 3 V (nRF52840 Product Specification, Current consumption: CPU running; from memory, 6.3 mA with the LDO)");
    SleepUa = ("mcu.sleep_ua", 3.16, "uA", 0.0, 10_000.0,
        "nRF52840 System ON, full RAM retention, RTC wake-up (nRF52840 Product Specification, Current consumption: Sleep; from memory)");
    SamplingMa = ("adc.sampling_ma", 1.0, "mA", 0.0, 1000.0,
        "SAADC with EasyDMA and the 16 MHz clock running while sampling, CPU waiting between blocks (nRF52840 Product Specification, Current consumption: SAADC active; from memory, order of magnitude)");
    SensorMa = ("sensor.on_ma", 1.0, "mA", 0.0, 1000.0,
        "assumption: a wide-band MEMS accelerometer and its front end powered through the sensor switch (from memory, typical of such parts)");
    SettleMs = ("sensor.settle_ms", 200.0, "ms", 0.0, 10_000.0,
        "sensor power-on and settling before sampling: the node's default `settle_ms` (wire/src/config.rs)");
    TxMa = ("radio.tx_ma", 29.0, "mA", 0.0, 1000.0,
        "SX1276 transmitting at +13 dBm on the RFO pin (SX1276/77/78/79 datasheet, section 2.5.1 Power Consumption, IDDT; from memory; +17 dBm on PA_BOOST: 87 mA)");
    RxMa = ("radio.rx_ma", 10.8, "mA", 0.0, 1000.0,
        "SX1276 receiving, LoRa 125 kHz, LnaBoost off (SX1276 datasheet, section 2.5.1, IDDR_L; from memory)");
    RadioSleepUa = ("radio.sleep_ua", 0.2, "uA", 0.0, 10_000.0,
        "SX1276 sleep (SX1276 datasheet, section 2.5.1, IDDSL; from memory)");
    MacOverhead = ("radio.mac_overhead_bytes", 13.0, "bytes", 0.0, 64.0,
        "LoRaWAN 1.0 uplink framing around the application payload: MHDR 1 + DevAddr 4 + FCtrl 1 + FCnt 2 + FPort 1 + MIC 4 (LoRaWAN specification, MAC message formats; common practice)");
    Preamble = ("radio.preamble_symbols", 8.0, "symbols", 6.0, 65_535.0,
        "LoRaWAN preamble (LoRaWAN Regional Parameters; common practice)");
    CodingRate = ("radio.coding_rate", 5.0, "4/x", 5.0, 8.0,
        "coding rate 4/5 of LoRaWAN uplinks (LoRaWAN Regional Parameters; common practice)");
    Rx1Symbols = ("radio.rx1_symbols", 8.0, "symbols", 0.0, 1000.0,
        "assumption: a receive window without a downlink stays open about 8 symbols (preamble detection timeout; from memory)");
    Rx2Symbols = ("radio.rx2_symbols", 8.0, "symbols", 0.0, 1000.0,
        "assumption: as RX1, at the RX2 data rate");
    Rx2Sf = ("radio.rx2_sf", 12.0, "SF", 6.0, 12.0,
        "RX2 window at DR0 = SF12/125 kHz, the EU868 default (LoRaWAN Regional Parameters; some networks use SF9)");
    Rx2BwKhz = ("radio.rx2_bw_khz", 125.0, "kHz", 7.8, 500.0,
        "RX2 bandwidth, EU868 default (LoRaWAN Regional Parameters)");
    QuiescentUa = ("board.quiescent_ua", 1.0, "uA", 0.0, 10_000.0,
        "assumption: load switch, supervisor and leakage of the board while asleep (not from a datasheet)");
    CapacityMah = ("cell.capacity_mah", 2_600.0, "mAh", 1.0, 1e7,
        "AA-size lithium thionyl chloride (Li-SOCl2) bobbin cell, nominal capacity (from memory of such cells' datasheets; C size about 8,500, D size about 19,000)");
    CellV = ("cell.voltage_v", 3.6, "V", 0.5, 60.0,
        "nominal voltage of a Li-SOCl2 cell (from memory); energies are charge x this voltage");
    SelfDischarge = ("cell.self_discharge_pct_per_year", 1.0, "%/year", 0.0, 100.0,
        "self-discharge of a Li-SOCl2 bobbin cell at 20 C, of nominal capacity per year (from memory)");
    UsablePct = ("cell.usable_pct", 100.0, "%", 1.0, 100.0,
        "share of the nominal capacity the node can use; lower it for cold sites or for the radio's pulses without a buffer capacitor (assumption)");
}

/// Where a parameter's value came from.
#[derive(Clone, Debug, PartialEq)]
pub enum Origin {
    /// The documented default.
    Default,
    /// A hardware file.
    File(String),
    /// A command-line option.
    Option(&'static str),
}

/// The figures of one node.
#[derive(Clone, Debug)]
pub struct Hardware {
    values: Vec<f64>,
    origins: Vec<Origin>,
}

impl Default for Hardware {
    fn default() -> Self {
        Self {
            values: PARAMS.iter().map(|d| d.default).collect(),
            origins: vec![Origin::Default; PARAMS.len()],
        }
    }
}

impl Hardware {
    /// The value of `p`.
    pub fn get(&self, p: P) -> f64 {
        self.values
            .get(p as usize)
            .copied()
            .unwrap_or(p.def().default)
    }

    /// Where the value of `p` came from.
    pub fn origin(&self, p: P) -> &Origin {
        self.origins.get(p as usize).unwrap_or(&Origin::Default)
    }

    /// Sets `p` after checking its range; `Err` names the key.
    pub fn set(&mut self, p: P, v: f64, origin: Origin) -> Result<(), RangeError> {
        let d = p.def();
        if !(v.is_finite() && v >= d.min && v <= d.max) {
            return Err(RangeError {
                key: d.key,
                value: v,
                min: d.min,
                max: d.max,
                unit: d.unit,
            });
        }
        if let (Some(slot), Some(o)) = (
            self.values.get_mut(p as usize),
            self.origins.get_mut(p as usize),
        ) {
            *slot = v;
            *o = origin;
        }
        Ok(())
    }

    /// Every parameter with its value and origin, in table order.
    pub fn rows(&self) -> impl Iterator<Item = (&'static ParamDef, f64, &Origin)> + '_ {
        ALL.iter().map(|&p| (p.def(), self.get(p), self.origin(p)))
    }

    /// Reads a hardware file over the defaults.
    pub fn load(path: &Path) -> Result<Self, CliError> {
        let text = std::fs::read_to_string(path).map_err(|e| {
            CliError::input(path.display(), format!("cannot read hardware file: {e}"))
        })?;
        Self::parse(&text, &path.display().to_string())
            .map_err(|m| CliError::input(path.display(), m))
    }

    /// Parses hardware-file text; the error names the key (or the TOML line).
    pub fn parse(text: &str, source: &str) -> Result<Self, HardwareFileError> {
        let table: toml::Table =
            toml::from_str(text).map_err(|e| HardwareFileError::Toml(e.to_string()))?;
        let by_key: BTreeMap<&str, P> = ALL.iter().map(|&p| (p.def().key, p)).collect();
        let sections: Vec<&str> = {
            let mut s: Vec<&str> = PARAMS
                .iter()
                .filter_map(|d| d.key.split_once('.').map(|(a, _)| a))
                .collect();
            s.dedup();
            s
        };
        let mut hw = Self::default();
        for (section, body) in &table {
            let Some(body) = body.as_table() else {
                return Err(HardwareFileError::NotSection {
                    section: section.clone(),
                    sections: sections.join(", "),
                });
            };
            if !sections.contains(&section.as_str()) {
                return Err(HardwareFileError::UnknownSection {
                    section: section.clone(),
                    sections: sections.join(", "),
                });
            }
            for (key, value) in body {
                let full = format!("{section}.{key}");
                let Some(&p) = by_key.get(full.as_str()) else {
                    let known: Vec<&str> = PARAMS
                        .iter()
                        .filter_map(|d| d.key.strip_prefix(&format!("{section}.")))
                        .collect();
                    return Err(HardwareFileError::UnknownKey {
                        key: full,
                        section: section.clone(),
                        known: known.join(", "),
                    });
                };
                let v = match value {
                    toml::Value::Float(x) => *x,
                    toml::Value::Integer(i) => {
                        // hardware figures are far below 2^53
                        #[allow(clippy::cast_precision_loss)]
                        let x = *i as f64;
                        x
                    }
                    other => {
                        return Err(HardwareFileError::NotNumber {
                            key: full,
                            unit: p.def().unit,
                            found: other.type_str(),
                        })
                    }
                };
                hw.set(p, v, Origin::File(source.to_string()))
                    .map_err(HardwareFileError::Range)?;
            }
        }
        Ok(hw)
    }
}

/// A value outside its parameter's range ([`Hardware::set`]).
#[derive(Debug, Clone, PartialEq)]
pub struct RangeError {
    /// The parameter's key.
    pub key: &'static str,
    /// The value given.
    pub value: f64,
    /// Lowest allowed.
    pub min: f64,
    /// Highest allowed.
    pub max: f64,
    /// Unit of the parameter.
    pub unit: &'static str,
}

impl std::fmt::Display for RangeError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "{}: {} is outside {} ..= {} {}",
            self.key, self.value, self.min, self.max, self.unit
        )
    }
}

impl std::error::Error for RangeError {}

/// Why a hardware file was refused ([`Hardware::parse`]); the text names
/// the section or key (or the TOML line).
#[derive(Debug, Clone, PartialEq)]
pub enum HardwareFileError {
    /// Not TOML (the parser's message names the line).
    Toml(String),
    /// A top-level key that is not a section.
    NotSection {
        /// The key.
        section: String,
        /// The known sections, comma-separated.
        sections: String,
    },
    /// A section that does not exist.
    UnknownSection {
        /// The section.
        section: String,
        /// The known sections, comma-separated.
        sections: String,
    },
    /// A key that its section does not take.
    UnknownKey {
        /// `section.key`.
        key: String,
        /// The section.
        section: String,
        /// The keys it takes, comma-separated.
        known: String,
    },
    /// A value that is not a number.
    NotNumber {
        /// `section.key`.
        key: String,
        /// Unit of the parameter.
        unit: &'static str,
        /// TOML type found.
        found: &'static str,
    },
    /// A number outside the parameter's range.
    Range(RangeError),
}

impl std::fmt::Display for HardwareFileError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Self::Toml(e) => f.write_str(e),
            Self::NotSection { section, sections } => write!(
                f,
                "`{section}`: expected a section [{section}]; sections are {sections}"
            ),
            Self::UnknownSection { section, sections } => {
                write!(f, "[{section}]: unknown section; sections are {sections}")
            }
            Self::UnknownKey {
                key,
                section,
                known,
            } => write!(f, "{key}: unknown key; [{section}] takes {known}"),
            Self::NotNumber { key, unit, found } => {
                write!(f, "{key}: expected a number ({unit}), found {found}")
            }
            Self::Range(e) => write!(f, "{e}"),
        }
    }
}

impl std::error::Error for HardwareFileError {}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_parameter_has_a_source_and_a_default_in_range() {
        assert_eq!(PARAMS.len(), ALL.len());
        for (i, d) in PARAMS.iter().enumerate() {
            assert_eq!(ALL[i] as usize, i);
            assert!(!d.source.is_empty(), "{}", d.key);
            assert!(d.default >= d.min && d.default <= d.max, "{}", d.key);
            assert!(d.key.contains('.'), "{}", d.key);
        }
    }

    #[test]
    fn a_file_overrides_and_names_bad_keys() {
        let hw = Hardware::parse(
            "[mcu]\nrun_ma = 6.3\n[cell]\ncapacity_mah = 8500\n",
            "hw.toml",
        )
        .unwrap();
        assert_eq!(hw.get(P::RunMa), 6.3);
        assert_eq!(hw.get(P::CapacityMah), 8500.0);
        assert_eq!(hw.origin(P::RunMa), &Origin::File("hw.toml".into()));
        assert_eq!(hw.get(P::SleepUa), 3.16);
        assert_eq!(hw.origin(P::SleepUa), &Origin::Default);
        let cases = [
            ("[mcu]\nrun_mA = 3\n", "mcu.run_mA: unknown key"),
            ("[cpu2]\nx = 1\n", "[cpu2]: unknown section"),
            ("[mcu]\nrun_ma = \"3\"\n", "mcu.run_ma: expected a number"),
            ("[mcu]\nrun_ma = -1.0\n", "mcu.run_ma: -1 is outside"),
            (
                "[cell]\nself_discharge_pct_per_year = 120\n",
                "cell.self_discharge_pct_per_year",
            ),
            ("[radio]\nrx2_sf = 13\n", "radio.rx2_sf"),
            ("mcu = 3\n", "`mcu`: expected a section"),
            ("[mcu\n", "line 1"),
        ];
        for (text, want) in cases {
            let err = Hardware::parse(text, "hw.toml").unwrap_err().to_string();
            assert!(err.contains(want), "{text:?}: {err}");
        }
    }
}
