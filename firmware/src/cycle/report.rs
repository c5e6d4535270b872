//! The uplink side of a cycle: the report sent by exception (full or
//! reduced frame) and the status frame.

use super::{ConfigSource, Fault, Node, FRAME_CAPACITY};
use crate::config::{BandSource, PointRecord};
use crate::exception::Choice;
use crate::hal::{Board, MeasurementCore};
use crate::log::log_info;
use wire::frame::status::{encode_status, BootConfig, StatusReport};
use wire::frame::FrameFlags;

/// The band a record measures with: its own, or dsp-core's default band for
/// its sample rate when it has none.
pub fn band_in_use(config: &PointRecord) -> [f32; 2] {
    match config.band_hz() {
        Some(b) => b,
        None => {
            let mut p = dsp_core::config::PointConfig::default();
            // validated range 1 kHz..200 kHz: exact in f32
            p.sample_rate_hz = f32::from(u16::try_from(config.sample_rate_hz / 10).unwrap_or(0))
                * 10.0
                + f32::from(u8::try_from(config.sample_rate_hz % 10).unwrap_or(0));
            p.default_band_hz()
        }
    }
}

impl<B: Board, C: MeasurementCore> Node<B, C> {
    /// The status the next status frame would carry (sequence number
    /// included; the flags are those of the last cycle).
    pub fn status(&self) -> StatusReport {
        // the status frame shows the kurtosis of a surveyed band only
        let band_source = self.config.band_source;
        let band_kurtosis = match band_source {
            BandSource::Survey => self.config.band_kurtosis,
            BandSource::Configured | BandSource::Unset => f32::NAN,
        };
        StatusReport {
            node_id: self.node_id().unwrap_or(0),
            seq: self.link.status_seq,
            flags: FrameFlags::from_quality(self.summary.flags),
            band_source,
            boot_config: match self.config_source {
                ConfigSource::Stored => BootConfig::Stored,
                ConfigSource::DefaultEmpty => BootConfig::DefaultEmpty,
                ConfigSource::DefaultInvalid => BootConfig::DefaultInvalid,
            },
            provisioned: self.identity.is_some(),
            downlink_counter: self.counter,
            last_downlink: self.link.last_downlink.result(),
            refused_downlinks: self.link.refused,
            survey: self.link.survey.status(),
            band_hz: band_in_use(&self.config),
            band_kurtosis,
            ..StatusReport::default()
        }
    }

    /// Encodes the status frame into `out` and advances its sequence number.
    #[inline(never)] // keeps its buffers out of the frame of every step
    pub(super) fn encode_status_frame(&mut self, out: &mut [u8]) -> Result<usize, Fault> {
        let n = encode_status(&self.status(), out).map_err(|_| Fault::Status)?;
        self.link.status_seq = self.link.status_seq.wrapping_add(1);
        self.link.status_pending = false;
        Ok(n)
    }

    /// Replaces the full frame of `n` bytes in `self.frame` by the reduced
    /// frame when the policy says so; returns the length to send. A frame
    /// that does not decode as a dsp-core full frame is sent as it is.
    #[inline(never)] // keeps the decoded report out of the frame of every step
    pub(super) fn by_exception(&mut self, n: usize) -> usize {
        let Some(report) = self
            .frame
            .get(..n)
            .and_then(|b| wire::frame::decode(b).ok())
        else {
            return n;
        };
        let mut choice = self.exception.choose(&self.policy, &report);
        let mut len = n;
        if choice == Choice::Reduced {
            let mut buf = [0u8; FRAME_CAPACITY];
            match wire::frame::encode_reduced(&report, &mut buf) {
                Ok(m) => {
                    self.frame = buf;
                    len = m;
                }
                // cannot happen for a decoded report; the full frame goes out
                Err(_) => choice = Choice::Full(crate::exception::FullReason::Periodic),
            }
        }
        log_info!("report frame {}", choice);
        self.summary.report_frame = Some(choice);
        self.pending = Some((choice, report));
        len
    }
}
