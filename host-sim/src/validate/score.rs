//! Judging one record and counting the results (see the module doc of
//! [`crate::validate`] for what counts as right).

use dsp_core::DefectKind;

use super::manifest::canonical_location;
use super::method::RecordResult;
use crate::validate_outcome::counts;

/// Whether a detection list is right for an expectation (see the module doc).
pub fn judge(expected: Option<DefectKind>, detected: &[DefectKind], scores: &[f32; 4]) -> bool {
    match expected {
        None => detected.is_empty(),
        Some(k) => {
            let s = |k: DefectKind| scores.get(k.index()).copied().unwrap_or(f32::MIN);
            detected.contains(&k) && detected.iter().all(|&d| s(d) <= s(k))
        }
    }
}

/// Summary counts: (group, total, correct), by fault type, channel and
/// sample rate.
pub fn totals(results: &[RecordResult]) -> Vec<(String, usize, usize)> {
    let mut groups: Vec<(String, usize, usize)> = Vec::new();
    let mut add = |g: String, ok: bool| {
        if let Some(e) = groups.iter_mut().find(|e| e.0 == g) {
            e.1 += 1;
            e.2 += usize::from(ok);
        } else {
            groups.push((g, 1, usize::from(ok)));
        }
    };
    for r in results {
        let Some(ok) = r.correct else { continue };
        let ch = if r.channel.is_empty() {
            "-"
        } else {
            r.channel.as_str()
        };
        let loc = canonical_location(&r.fault_location);
        add("all".into(), ok);
        add(format!("fault {loc}"), ok);
        add(format!("channel {ch}"), ok);
        add(format!("{loc} / {ch}"), ok);
    }
    groups
}

/// Scored records per outcome ([`crate::validate_outcome`]), by fault type
/// (`all` first), counts in [`crate::validate_outcome::Outcome::ALL`] order.
pub fn outcome_rows(results: &[RecordResult]) -> Vec<(String, [usize; 5])> {
    let mut rows: Vec<(String, [usize; 5])> = Vec::new();
    for r in results {
        let Some(o) = r.outcome else { continue };
        let c = counts(core::iter::once(o));
        for g in ["all".to_string(), canonical_location(&r.fault_location)] {
            match rows.iter_mut().find(|e| e.0 == g) {
                Some(e) => e.1.iter_mut().zip(c).for_each(|(a, b)| *a += b),
                None => rows.push((g, c)),
            }
        }
    }
    rows
}

/// Decoy false alarms over the records where a decoy bearing was watched:
/// `(records with a detection on it, records)`, `None` without a decoy.
pub fn decoy_summary(results: &[RecordResult]) -> Option<(usize, usize)> {
    let watched: Vec<&Vec<DefectKind>> = results
        .iter()
        .filter_map(|r| r.decoy_detected.as_ref())
        .collect();
    (!watched.is_empty()).then(|| {
        (
            watched.iter().filter(|d| !d.is_empty()).count(),
            watched.len(),
        )
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::validate::expected_kind;

    #[test]
    fn judging() {
        let s = [20.0, 30.0, 0.0, 10.0];
        assert!(judge(
            Some(DefectKind::Bpfi),
            &[DefectKind::Bpfi, DefectKind::Bsf],
            &s
        ));
        assert!(!judge(
            Some(DefectKind::Bsf),
            &[DefectKind::Bpfi, DefectKind::Bsf],
            &s
        ));
        assert!(!judge(Some(DefectKind::Bpfo), &[], &s));
        assert!(judge(None, &[], &s));
        assert!(!judge(None, &[DefectKind::Ftf], &s));
        assert_eq!(expected_kind("outer_race"), Some(Some(DefectKind::Bpfo)));
        assert_eq!(expected_kind(" Inner race"), Some(Some(DefectKind::Bpfi)));
        assert_eq!(expected_kind("outer-race"), Some(Some(DefectKind::Bpfo)));
        assert_eq!(expected_kind("NONE"), Some(None));
        assert_eq!(expected_kind("faulty bearing; race not stated"), None);
        assert_eq!(expected_kind("inner race and ball"), None);
    }
}
