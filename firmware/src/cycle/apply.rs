//! Application of a received downlink (verified first, then parsed), and
//! the records it stores: the configuration with its replay counter, and
//! the baseline sealed with a CRC-32.

use super::{DownlinkOutcome, Node};
use crate::config::{PointRecord, MAX_STORED_LEN};
use crate::crc::crc32;
use crate::downlink::{self, Command, DownlinkError, MAX_BASELINE_LEN};
use crate::hal::{Board, MeasurementCore, Slot, Storage};
use crate::log::log_warn;

impl<B: Board, C: MeasurementCore> Node<B, C> {
    /// Writes the configuration with its counter in one record.
    pub(super) fn store_config(&mut self, counter: u32, record: &PointRecord) -> bool {
        store_config(&mut self.dev.storage, counter, record)
    }

    /// Advances the stored counter (same record, new counter) before a
    /// command that changes no configuration takes effect, so it cannot be
    /// replayed after a power cycle either.
    fn commit_counter(&mut self, counter: u32) -> bool {
        // no copy of the record: the storage and the record are disjoint fields
        let ok = store_config(&mut self.dev.storage, counter, &self.config);
        if ok {
            self.counter = counter;
        }
        ok
    }

    /// Applies one received downlink: verified under the node's key first
    /// ([`downlink::open`]), then parsed. A refused one changes nothing and
    /// is counted; either way a status frame goes out with the next uplink.
    #[inline(never)] // keeps its buffers out of the frame of every step
    pub fn apply_downlink(&mut self, msg: &[u8]) -> DownlinkOutcome {
        let outcome = self.apply_verified(msg);
        if let DownlinkOutcome::Refused(_e) = outcome {
            log_warn!("downlink refused: {}", _e);
            self.link.refused = self.link.refused.saturating_add(1);
        }
        self.link.last_downlink = outcome;
        self.link.status_pending = true;
        outcome
    }

    fn apply_verified(&mut self, msg: &[u8]) -> DownlinkOutcome {
        let (counter, cmd) = match downlink::open(self.identity.as_ref(), self.counter, msg) {
            Ok(x) => x,
            Err(e) => return DownlinkOutcome::Refused(e),
        };
        match cmd {
            Command::SetConfig(rec) => {
                if self.store_config(counter, &rec) {
                    self.config = rec;
                    self.counter = counter;
                    // a new configuration without a band gets its survey
                    self.link.survey_tried = false;
                    DownlinkOutcome::ConfigApplied
                } else {
                    DownlinkOutcome::NotStored
                }
            }
            Command::MeasureNow => {
                if self.commit_counter(counter) {
                    self.measure_now = true;
                    DownlinkOutcome::MeasureNow
                } else {
                    DownlinkOutcome::NotStored
                }
            }
            Command::Survey => {
                if self.commit_counter(counter) {
                    self.link.survey_requested = true;
                    DownlinkOutcome::SurveyRequested
                } else {
                    DownlinkOutcome::NotStored
                }
            }
            Command::SetBaseline(data) => {
                if self.core.load_baseline(data).is_err() {
                    return DownlinkOutcome::Refused(DownlinkError::BadBaseline);
                }
                if !self.commit_counter(counter) {
                    return DownlinkOutcome::NotStored;
                }
                let mut buf = [0u8; MAX_BASELINE_LEN + 4];
                match seal(data, &mut buf) {
                    Some(sealed) if self.dev.storage.store(Slot::Baseline, sealed).is_ok() => {
                        DownlinkOutcome::BaselineApplied
                    }
                    _ => DownlinkOutcome::NotStored,
                }
            }
        }
    }
}

/// Writes `counter` and `record` as one [`crate::config::StoredConfig`]
/// (counter u32 LE, then the record), without copying the record.
#[inline(never)] // keeps its buffer out of the frame of every step
fn store_config<S: Storage>(storage: &mut S, counter: u32, record: &PointRecord) -> bool {
    let mut buf = [0u8; MAX_STORED_LEN];
    let Some((head, rest)) = buf.split_at_mut_checked(4) else {
        return false;
    };
    head.copy_from_slice(&counter.to_le_bytes());
    let Ok(n) = record.encode(rest) else {
        return false;
    };
    buf.get(..4 + n)
        .is_some_and(|bytes| storage.store(Slot::Config, bytes).is_ok())
}

/// Appends a CRC-32 to `data` in `buf`.
fn seal<'a>(data: &[u8], buf: &'a mut [u8]) -> Option<&'a [u8]> {
    let n = data.len();
    buf.get_mut(..n)?.copy_from_slice(data);
    buf.get_mut(n..n + 4)?
        .copy_from_slice(&crc32(data).to_le_bytes());
    buf.get(..n + 4)
}

/// Checks and strips the CRC-32 trailer written by [`seal`].
pub(super) fn unseal(data: &[u8]) -> Option<&[u8]> {
    let (payload, crc) = data.split_at_checked(data.len().checked_sub(4)?)?;
    let mut c = [0u8; 4];
    c.copy_from_slice(crc);
    (!payload.is_empty() && crc32(payload) == u32::from_le_bytes(c)).then_some(payload)
}
