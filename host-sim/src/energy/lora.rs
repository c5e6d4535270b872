//! LoRa time on air.
//!
//! The formula is Semtech's, as given in the SX1276/77/78/79 datasheet
//! (section 4.1.1.7, "Time on air") and in application note AN1200.13
//! ("LoRa Modem Designer's Guide"), quoted here from memory:
//!
//! ```text
//! Tsym      = 2^SF / BW
//! Tpreamble = (n_preamble + 4.25) Tsym
//! n_payload = 8 + max(ceil((8 PL - 4 SF + 28 + 16 CRC - 20 IH) / (4 (SF - 2 DE))) (CR + 4), 0)
//! ToA       = Tpreamble + n_payload Tsym
//! ```
//!
//! with PL the PHY payload in bytes, CRC = 1 when the payload CRC is on,
//! IH = 1 for the implicit header mode, DE = 1 with low data rate
//! optimisation and CR = 1..4 for the coding rates 4/5..4/8. The datasheet
//! mandates low data rate optimisation when a symbol lasts more than 16 ms
//! (SF11 and SF12 at 125 kHz); [`LowDataRate::Auto`] follows that rule.
//! The tests check the result against published values (The Things Stack's
//! time-on-air tests).

use core::fmt;

/// Bandwidths of the SX1276 LoRa modem, Hz (datasheet register
/// `RegModemConfig1`, from memory).
pub const BANDWIDTHS_HZ: [u32; 10] = [
    7_800, 10_400, 15_600, 20_800, 31_250, 41_700, 62_500, 125_000, 250_000, 500_000,
];

/// Whether the low data rate optimisation bit is set.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum LowDataRate {
    /// On when a symbol lasts more than 16 ms (the datasheet's rule).
    Auto,
    /// Always on.
    On,
    /// Always off.
    Off,
}

/// Modulation and packet settings of one LoRa transmission.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct LoraParams {
    /// Spreading factor, 6..=12.
    pub sf: u8,
    /// Bandwidth in Hz, one of [`BANDWIDTHS_HZ`].
    pub bw_hz: u32,
    /// Coding rate denominator: 5..=8 for 4/5..4/8.
    pub coding_rate: u8,
    /// Programmed preamble length in symbols.
    pub preamble_symbols: u16,
    /// Explicit header (LoRaWAN uplinks: yes).
    pub explicit_header: bool,
    /// Payload CRC (LoRaWAN uplinks: on; downlinks: off).
    pub crc: bool,
    /// Low data rate optimisation.
    pub low_data_rate: LowDataRate,
}

impl LoraParams {
    /// A LoRaWAN uplink at `sf` and `bw_hz`: coding rate 4/5, 8 preamble
    /// symbols, explicit header, CRC on, low data rate optimisation by the
    /// datasheet's rule (LoRaWAN Regional Parameters, common practice).
    pub fn lorawan_uplink(sf: u8, bw_hz: u32) -> Self {
        Self {
            sf,
            bw_hz,
            coding_rate: 5,
            preamble_symbols: 8,
            explicit_header: true,
            crc: true,
            low_data_rate: LowDataRate::Auto,
        }
    }

    /// Checks the settings.
    pub fn validate(&self) -> Result<(), LoraError> {
        if !(6..=12).contains(&self.sf) {
            return Err(LoraError::SpreadingFactor(self.sf));
        }
        if !BANDWIDTHS_HZ.contains(&self.bw_hz) {
            return Err(LoraError::Bandwidth(self.bw_hz));
        }
        if !(5..=8).contains(&self.coding_rate) {
            return Err(LoraError::CodingRate(self.coding_rate));
        }
        Ok(())
    }

    /// Duration of one symbol, s.
    pub fn symbol_s(&self) -> f64 {
        f64::from(1u32 << self.sf.min(12)) / f64::from(self.bw_hz.max(1))
    }

    /// Whether the low data rate optimisation is on for these settings.
    pub fn low_data_rate_on(&self) -> bool {
        match self.low_data_rate {
            LowDataRate::On => true,
            LowDataRate::Off => false,
            LowDataRate::Auto => self.symbol_s() > 0.016,
        }
    }
}

/// Why a time on air cannot be computed.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum LoraError {
    /// Spreading factor outside 6..=12.
    SpreadingFactor(u8),
    /// Not a bandwidth of the modem (Hz).
    Bandwidth(u32),
    /// Coding rate denominator outside 5..=8.
    CodingRate(u8),
    /// PHY payload above 255 bytes.
    Payload(usize),
}

impl fmt::Display for LoraError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::SpreadingFactor(sf) => write!(f, "spreading factor {sf} is not 6..=12"),
            Self::Bandwidth(bw) => write!(
                f,
                "bandwidth {bw} Hz is not one of the modem's (7.8, 10.4, 15.6, 20.8, 31.25, 41.7, 62.5, 125, 250, 500 kHz)"
            ),
            Self::CodingRate(cr) => write!(f, "coding rate 4/{cr} is not 4/5..4/8"),
            Self::Payload(n) => write!(f, "PHY payload of {n} bytes, at most 255"),
        }
    }
}

impl std::error::Error for LoraError {}

/// Symbols of the payload part (header, payload, CRC): `n_payload`.
pub fn payload_symbols(p: &LoraParams, phy_payload: usize) -> Result<u32, LoraError> {
    p.validate()?;
    let pl = i64::try_from(phy_payload)
        .ok()
        .filter(|&n| n <= 255)
        .ok_or(LoraError::Payload(phy_payload))?;
    let sf = i64::from(p.sf);
    let crc = i64::from(p.crc);
    let ih = i64::from(!p.explicit_header);
    let de = i64::from(p.low_data_rate_on());
    let num = 8 * pl - 4 * sf + 28 + 16 * crc - 20 * ih;
    let den = 4 * (sf - 2 * de); // sf >= 6, de <= 1: den >= 16
    let blocks = if num > 0 { (num + den - 1) / den } else { 0 };
    let cr = i64::from(p.coding_rate); // CR + 4 of the formula
    let n = 8 + blocks * cr;
    Ok(u32::try_from(n).unwrap_or(u32::MAX))
}

/// Time on air of one packet with `phy_payload` bytes, s.
pub fn time_on_air_s(p: &LoraParams, phy_payload: usize) -> Result<f64, LoraError> {
    let n = payload_symbols(p, phy_payload)?;
    Ok((f64::from(p.preamble_symbols) + 4.25 + f64::from(n)) * p.symbol_s())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn toa_us(sf: u8, bw: u32, cr: u8, pl: usize) -> f64 {
        let mut p = LoraParams::lorawan_uplink(sf, bw);
        p.coding_rate = cr;
        time_on_air_s(&p, pl).unwrap() * 1e6
    }

    /// Published values: The Things Stack, `pkg/toa/toa_test.go`
    /// (TheThingsNetwork/lorawan-stack), PHY payloads with explicit header,
    /// CRC on, 8 preamble symbols, low data rate optimisation at SF11/SF12
    /// and 125 kHz; microseconds.
    #[test]
    fn time_on_air_matches_the_things_stack_tests() {
        let by_sf = [
            (7, 41_216.0),
            (8, 72_192.0),
            (9, 144_384.0),
            (10, 288_768.0),
            (11, 577_536.0),
            (12, 991_232.0),
        ];
        for (sf, us) in by_sf {
            let got = toa_us(sf, 125_000, 5, 10);
            assert!((got - us).abs() < 1e-3, "SF{sf}: {got} us, published {us}");
        }
        for (bw, us) in [
            (125_000, 41_216.0),
            (250_000, 20_608.0),
            (500_000, 10_304.0),
        ] {
            let got = toa_us(7, bw, 5, 10);
            assert!((got - us).abs() < 1e-3, "BW {bw}: {got} us, published {us}");
        }
        for (cr, us) in [(5, 41_216.0), (6, 45_312.0), (7, 49_408.0), (8, 53_504.0)] {
            let got = toa_us(7, 125_000, cr, 10);
            assert!(
                (got - us).abs() < 1e-3,
                "CR 4/{cr}: {got} us, published {us}"
            );
        }
        for (pl, us) in [
            (13, 46_336.0),
            (14, 46_336.0),
            (15, 46_336.0),
            (16, 51_456.0),
            (19, 51_456.0),
        ] {
            let got = toa_us(7, 125_000, 5, pl);
            assert!(
                (got - us).abs() < 1e-3,
                "{pl} bytes: {got} us, published {us}"
            );
        }
    }

    /// The low data rate rule: symbols over 16 ms (SX1276 datasheet, from memory).
    #[test]
    fn low_data_rate_optimisation_follows_the_symbol_length() {
        assert!(!LoraParams::lorawan_uplink(10, 125_000).low_data_rate_on()); // 8.2 ms
        assert!(LoraParams::lorawan_uplink(11, 125_000).low_data_rate_on()); // 16.4 ms
        assert!(!LoraParams::lorawan_uplink(11, 250_000).low_data_rate_on()); // 8.2 ms
        assert!(LoraParams::lorawan_uplink(12, 250_000).low_data_rate_on()); // 16.4 ms
        let mut p = LoraParams::lorawan_uplink(12, 125_000);
        p.low_data_rate = LowDataRate::Off;
        // 20 bytes: 8*20-48+44 = 156, /48 and /40 both round up to 4 blocks
        let off = payload_symbols(&p, 20).unwrap();
        p.low_data_rate = LowDataRate::On;
        let on = payload_symbols(&p, 20).unwrap();
        assert_eq!((off, on), (8 + 4 * 5, 8 + 4 * 5));
        let off = payload_symbols(
            &LoraParams {
                low_data_rate: LowDataRate::Off,
                ..p
            },
            30,
        )
        .unwrap();
        let on = payload_symbols(&p, 30).unwrap();
        // 8*30-48+44 = 236: /48 -> 5 blocks off, /40 -> 6 blocks on
        assert_eq!((off, on), (8 + 5 * 5, 8 + 6 * 5));
    }

    #[test]
    fn bad_settings_are_errors() {
        let mut p = LoraParams::lorawan_uplink(13, 125_000);
        assert_eq!(time_on_air_s(&p, 10), Err(LoraError::SpreadingFactor(13)));
        p.sf = 7;
        p.bw_hz = 100_000;
        assert_eq!(time_on_air_s(&p, 10), Err(LoraError::Bandwidth(100_000)));
        p.bw_hz = 125_000;
        p.coding_rate = 9;
        assert_eq!(time_on_air_s(&p, 10), Err(LoraError::CodingRate(9)));
        p.coding_rate = 5;
        assert_eq!(time_on_air_s(&p, 256), Err(LoraError::Payload(256)));
        assert!(time_on_air_s(&p, 255).is_ok());
    }
}
