//! Reports by exception: a full frame only when something changed.
//!
//! After each measurement the cycle compares the report with the last full
//! frame it sent. It sends a full frame when
//! * it has sent none since boot,
//! * a quality flag is raised, or the flags differ from that frame's,
//! * a finding moved by [`ReportPolicy::margin_db`] or more: a defect score
//!   (dB), a detection decision, the ISO zone, or the acceleration or
//!   velocity RMS (as a level, 20 log10 of the ratio),
//! * or [`ReportPolicy::full_every`] cycles have passed since it;
//!
//! otherwise the 11-byte reduced frame ([`crate::frame::encode_reduced`]),
//! which the gateway reads as "as before, with this worst score". The
//! comparison is made on the values as the frame carries them (quantised),
//! so what the gateway sees decides. Peak, crest factor, kurtosis, speed and
//! the 1x amplitudes travel in full frames only; a full frame every
//! `full_every` cycles bounds how old they get.
//!
//! The state advances only when a frame was handed to the radio
//! ([`ExceptionState::sent`]): a cycle that fails before the uplink does not
//! make the next reduced frame refer to a full frame never sent.

use crate::frame::{FrameFlags, FrameReport};
use dsp_core::num::log10f;

/// When the node sends a full frame. The defaults are this project's
/// choice: 3 dB is half the +6 dB alert rise of the gateway's trend limits
/// (a common practice for spectral trending), and 24 cycles is a full frame
/// a day at one measurement per hour.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct ReportPolicy {
    /// A finding that moved by this much (dB) or more since the last full
    /// frame sends a full frame. 0 sends one on any change.
    pub margin_db: f32,
    /// A full frame at least every this many cycles (1 = every cycle).
    pub full_every: u16,
}

impl ReportPolicy {
    /// A full frame every cycle (no reduced frames).
    pub const EVERY_CYCLE: Self = Self {
        margin_db: 0.0,
        full_every: 1,
    };

    /// Checks the settings: a finite margin >= 0 and `full_every` >= 1.
    pub fn validate(&self) -> Result<(), PolicyError> {
        if !(self.margin_db.is_finite() && self.margin_db >= 0.0) {
            return Err(PolicyError::Margin);
        }
        if self.full_every == 0 {
            return Err(PolicyError::FullEvery);
        }
        Ok(())
    }
}

impl Default for ReportPolicy {
    fn default() -> Self {
        Self {
            margin_db: 3.0,
            full_every: 24,
        }
    }
}

/// Why a policy is refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum PolicyError {
    /// The margin is negative or not finite.
    Margin,
    /// `full_every` is 0.
    FullEvery,
}

impl core::fmt::Display for PolicyError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        f.write_str(match self {
            Self::Margin => "margin_db must be finite and >= 0",
            Self::FullEvery => "full_every must be at least 1",
        })
    }
}

impl core::error::Error for PolicyError {}

/// Why a full frame is sent.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum FullReason {
    /// No full frame sent since boot.
    First,
    /// A flag is raised, or the flags changed.
    Flags,
    /// A finding moved by the margin or more.
    Changed,
    /// `full_every` cycles since the last full frame.
    Periodic,
}

/// What the cycle sends for one report.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Choice {
    /// The full frame, and why.
    Full(FullReason),
    /// The reduced frame ("as before").
    Reduced,
}

/// The last full frame sent and the cycles since.
#[derive(Clone, Debug, Default)]
pub struct ExceptionState {
    last_full: Option<FrameReport>,
    /// Reduced frames sent since the last full one.
    since_full: u16,
}

impl ExceptionState {
    /// No full frame sent yet.
    pub const fn new() -> Self {
        Self {
            last_full: None,
            since_full: 0,
        }
    }

    /// The frame to send for `r` under `policy` (an invalid policy sends
    /// full frames). Nothing changes until [`Self::sent`].
    pub fn choose(&self, policy: &ReportPolicy, r: &FrameReport) -> Choice {
        let Some(last) = &self.last_full else {
            return Choice::Full(FullReason::First);
        };
        if policy.validate().is_err() || policy.full_every <= 1 {
            return Choice::Full(FullReason::Periodic);
        }
        if r.flags != FrameFlags::default() || r.flags != last.flags {
            return Choice::Full(FullReason::Flags);
        }
        if changed(last, r, policy.margin_db) {
            return Choice::Full(FullReason::Changed);
        }
        if self.since_full.saturating_add(1) >= policy.full_every {
            return Choice::Full(FullReason::Periodic);
        }
        Choice::Reduced
    }

    /// Records that the frame of `choice` for `r` went to the radio.
    pub fn sent(&mut self, choice: Choice, r: &FrameReport) {
        match choice {
            Choice::Full(_) => {
                self.last_full = Some(r.clone());
                self.since_full = 0;
            }
            Choice::Reduced => self.since_full = self.since_full.saturating_add(1),
        }
    }

    /// The last full frame sent, as reported.
    pub fn last_full(&self) -> Option<&FrameReport> {
        self.last_full.as_ref()
    }
}

/// Two values are the same when equal, or both NaN.
fn same(a: f32, b: f32) -> bool {
    a == b || (a.is_nan() && b.is_nan())
}

/// A score moved by `margin` dB or more (a NaN on one side only counts).
fn moved_db(a: f32, b: f32, margin: f32) -> bool {
    if a.is_finite() && b.is_finite() {
        let d = (b - a).abs();
        d > 0.0 && d >= margin
    } else {
        !same(a, b)
    }
}

/// A level moved by `margin` dB or more (20 log10 of the ratio); zero,
/// negative or non-finite levels count as moved unless equal.
fn moved_level(a: f32, b: f32, margin: f32) -> bool {
    let positive = |x: f32| x.is_finite() && x > 0.0;
    if positive(a) && positive(b) {
        let d = (20.0 * log10f(b / a)).abs();
        d > 0.0 && d >= margin
    } else {
        !same(a, b)
    }
}

/// Whether `now` differs from `last` by the margin in any finding.
fn changed(last: &FrameReport, now: &FrameReport, margin: f32) -> bool {
    if last.bearings.len() != now.bearings.len()
        || last.overall.iso_zone != now.overall.iso_zone
        || moved_level(last.overall.accel_rms_g, now.overall.accel_rms_g, margin)
        || moved_level(
            last.overall.velocity_rms_mm_s,
            now.overall.velocity_rms_mm_s,
            margin,
        )
    {
        return true;
    }
    last.bearings.iter().zip(now.bearings.iter()).any(|(a, b)| {
        a.defects.iter().zip(b.defects.iter()).any(|(x, y)| {
            // the gateway grades a finding's severity on its amplitude:
            // a detected finding whose size moved by the margin is a
            // change as a score is (a line with nothing in it carries
            // noise, which the gateway does not grade)
            // v2 frames: a line's state (not searched / searched /
            // detected / shared) is news, and their size is the summed
            // amplitude (the 1x amplitude is not carried)
            let state = |d: &crate::frame::DefectResult| d.line.map(|l| l.state);
            let summed =
                |d: &crate::frame::DefectResult| d.line.map_or(f32::NAN, |l| l.amplitude_g);
            x.detected != y.detected
                || state(x) != state(y)
                || moved_db(x.score_db, y.score_db, margin)
                || (y.detected && moved_level(x.amplitude_1x_g, y.amplitude_1x_g, margin))
                || (y.detected && moved_level(summed(x), summed(y), margin))
        })
    }) || last.meshes.len() != now.meshes.len()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::frame::{BearingResult, IsoZone};

    fn report(score: f32) -> FrameReport {
        let mut r = FrameReport {
            speed_rpm: 1300.0,
            ..FrameReport::default()
        };
        r.overall.accel_rms_g = 0.4;
        r.overall.velocity_rms_mm_s = 2.0;
        r.overall.iso_zone = Some(IsoZone::B);
        let mut b = BearingResult::default();
        b.defects[0].score_db = score;
        r.bearings.push(b).unwrap();
        r.bearings.push(BearingResult::default()).unwrap();
        r
    }

    fn run(policy: &ReportPolicy, reports: &[FrameReport]) -> [usize; 2] {
        let mut st = ExceptionState::new();
        let mut n = [0, 0];
        for r in reports {
            let c = st.choose(policy, r);
            n[usize::from(c == Choice::Reduced)] += 1;
            st.sent(c, r);
        }
        n
    }

    #[test]
    fn first_then_reduced_until_a_change_or_the_period() {
        let p = ReportPolicy {
            margin_db: 3.0,
            full_every: 4,
        };
        let mut st = ExceptionState::new();
        let r = report(5.0);
        assert_eq!(st.choose(&p, &r), Choice::Full(FullReason::First));
        // nothing changes before `sent`
        assert_eq!(st.choose(&p, &r), Choice::Full(FullReason::First));
        st.sent(Choice::Full(FullReason::First), &r);
        for _ in 0..3 {
            assert_eq!(st.choose(&p, &report(7.0)), Choice::Reduced);
            st.sent(Choice::Reduced, &report(7.0));
        }
        // 3 reduced frames: the 4th cycle is full
        assert_eq!(
            st.choose(&p, &report(7.0)),
            Choice::Full(FullReason::Periodic)
        );
        // 2.9 dB is within the margin, 3 dB is not (from the last full frame)
        st.sent(Choice::Full(FullReason::Periodic), &report(7.0));
        assert_eq!(st.choose(&p, &report(9.9)), Choice::Reduced);
        assert_eq!(
            st.choose(&p, &report(10.0)),
            Choice::Full(FullReason::Changed)
        );
        assert_eq!(
            st.choose(&p, &report(4.0)),
            Choice::Full(FullReason::Changed)
        );
        assert_eq!(
            st.choose(&p, &report(f32::NAN)),
            Choice::Full(FullReason::Changed)
        );
    }

    #[test]
    fn flags_detections_zone_and_levels_send_full_frames() {
        let p = ReportPolicy::default();
        let mut st = ExceptionState::new();
        let base = report(5.0);
        st.sent(Choice::Full(FullReason::First), &base);
        let mut r = base.clone();
        r.flags.clipping = true;
        assert_eq!(st.choose(&p, &r), Choice::Full(FullReason::Flags));
        let mut r = base.clone();
        r.bearings[1].defects[3].detected = true;
        assert_eq!(st.choose(&p, &r), Choice::Full(FullReason::Changed));
        let mut r = base.clone();
        r.overall.iso_zone = Some(IsoZone::C);
        assert_eq!(st.choose(&p, &r), Choice::Full(FullReason::Changed));
        // 0.4 g -> 0.56 g is +2.9 dB, -> 0.57 g +3.1 dB
        let mut r = base.clone();
        r.overall.accel_rms_g = 0.56;
        assert_eq!(st.choose(&p, &r), Choice::Reduced);
        r.overall.accel_rms_g = 0.57;
        assert_eq!(st.choose(&p, &r), Choice::Full(FullReason::Changed));
        let mut r = base.clone();
        r.overall.velocity_rms_mm_s = 1.4; // -3.1 dB
        assert_eq!(st.choose(&p, &r), Choice::Full(FullReason::Changed));
        // speed is an operating condition, not a finding
        let mut r = base.clone();
        r.speed_rpm = 900.0;
        assert_eq!(st.choose(&p, &r), Choice::Reduced);
        // a flag that clears goes out in full too
        let mut flagged = base.clone();
        flagged.flags.low_battery = true;
        st.sent(Choice::Full(FullReason::Flags), &flagged);
        assert_eq!(st.choose(&p, &base), Choice::Full(FullReason::Flags));
    }

    #[test]
    fn every_cycle_and_invalid_policies_send_only_full_frames() {
        let reports = [report(5.0), report(5.0), report(5.0)];
        assert_eq!(run(&ReportPolicy::EVERY_CYCLE, &reports), [3, 0]);
        let bad = ReportPolicy {
            margin_db: f32::NAN,
            full_every: 24,
        };
        assert_eq!(bad.validate(), Err(PolicyError::Margin));
        assert_eq!(run(&bad, &reports), [3, 0]);
        let zero = ReportPolicy {
            margin_db: 3.0,
            full_every: 0,
        };
        assert_eq!(zero.validate(), Err(PolicyError::FullEvery));
        assert_eq!(run(&ReportPolicy::default(), &reports), [1, 2]);
        // margin 0: any change, and only a change, sends a full frame
        let any = ReportPolicy {
            margin_db: 0.0,
            full_every: 24,
        };
        assert_eq!(run(&any, &reports), [1, 2]);
        assert_eq!(run(&any, &[report(5.0), report(6.0), report(6.0)]), [2, 1]);
    }
}
