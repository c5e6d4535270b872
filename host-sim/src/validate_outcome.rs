//! How `envord validate` scores one record from the bearing's kind call
//! ([`dsp_core::diagnosis::kind_call`]): right, damaged with the kind uncertain, wrong
//! kind, missed, or a false alarm.
//!
//! A wrong kind is worse than a miss (it orders the wrong repair), so the
//! two are counted apart, and "damaged, kind uncertain" is a third outcome
//! of a fault record: not right (the kind is not named), not wrong (no wrong
//! kind is named), not missed (the damage is reported). On a healthy record
//! any finding, kind-uncertain included, is a false alarm.

use dsp_core::diagnosis::kind_call::KindCall;
use dsp_core::DefectKind;

/// Outcome of one scored record.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Outcome {
    /// The expected kind named, or nothing found on a healthy record.
    Right,
    /// A fault record reported damaged with the kind uncertain.
    KindUncertain,
    /// A fault record with another kind named.
    WrongKind,
    /// A fault record with nothing found (or an analysis error).
    Missed,
    /// A healthy record with a finding.
    FalseAlarm,
}

impl Outcome {
    /// Name in the JSON and the text table.
    pub fn name(self) -> &'static str {
        match self {
            Outcome::Right => "right",
            Outcome::KindUncertain => "kind_uncertain",
            Outcome::WrongKind => "wrong_kind",
            Outcome::Missed => "missed",
            Outcome::FalseAlarm => "false_alarm",
        }
    }

    /// All outcomes, in table order.
    pub const ALL: [Outcome; 5] = [
        Outcome::Right,
        Outcome::KindUncertain,
        Outcome::WrongKind,
        Outcome::Missed,
        Outcome::FalseAlarm,
    ];
}

/// Scores `call` against `expected` (`None` = healthy). An analysis error
/// passes `call = None`: a fault record is then missed, a healthy one
/// counts as a false alarm (it was not shown to be clean).
pub fn outcome(expected: Option<DefectKind>, call: Option<KindCall>) -> Outcome {
    match (expected, call) {
        (Some(_), None | Some(KindCall::NoFinding)) => Outcome::Missed,
        (Some(k), Some(KindCall::Named(n))) if n == k => Outcome::Right,
        (Some(_), Some(KindCall::Named(_))) => Outcome::WrongKind,
        (Some(_), Some(KindCall::Uncertain(_))) => Outcome::KindUncertain,
        (None, Some(KindCall::NoFinding)) => Outcome::Right,
        (None, _) => Outcome::FalseAlarm,
    }
}

/// Counts per outcome, in [`Outcome::ALL`] order.
pub fn counts(outcomes: impl Iterator<Item = Outcome>) -> [usize; 5] {
    let mut c = [0usize; 5];
    for o in outcomes {
        if let Some(i) = Outcome::ALL.iter().position(|&a| a == o) {
            if let Some(n) = c.get_mut(i) {
                *n += 1;
            }
        }
    }
    c
}

#[cfg(test)]
mod tests {
    use super::*;
    use dsp_core::diagnosis::kind_call::UncertainReason;

    #[test]
    fn outcomes() {
        let unc = KindCall::Uncertain(UncertainReason::CageOnly);
        let bpfo = Some(DefectKind::Bpfo);
        assert_eq!(
            outcome(bpfo, Some(KindCall::Named(DefectKind::Bpfo))),
            Outcome::Right
        );
        assert_eq!(
            outcome(bpfo, Some(KindCall::Named(DefectKind::Bpfi))),
            Outcome::WrongKind
        );
        assert_eq!(outcome(bpfo, Some(unc)), Outcome::KindUncertain);
        assert_eq!(outcome(bpfo, Some(KindCall::NoFinding)), Outcome::Missed);
        assert_eq!(outcome(bpfo, None), Outcome::Missed);
        assert_eq!(outcome(None, Some(KindCall::NoFinding)), Outcome::Right);
        assert_eq!(outcome(None, Some(unc)), Outcome::FalseAlarm);
        assert_eq!(outcome(None, None), Outcome::FalseAlarm);
        let c = counts([Outcome::Right, Outcome::Right, Outcome::Missed].into_iter());
        assert_eq!(c, [2, 0, 0, 1, 0]);
    }
}
