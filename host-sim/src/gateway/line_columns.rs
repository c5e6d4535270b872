//! The v3 defect columns of the store from a decoded report line.
//!
//! Schema v3 added `searched`, `amplitude_g`, `harmonics_searched`,
//! `sidebands` and `margin_db` to `defects`; report frames of version 2 carry
//! them (`wire::frame::v2`), version 1 frames do not: their rows keep
//! `searched` = 1 (the column's default, as before) and NULL in the others.
//! A v2 line that was not searched is `searched` = 0 with NULL amplitude and
//! margin, so a trend never reads it as a healthy zero. The line's state
//! (detected / shared with another bearing) and a not-searched reason are
//! in the report's `json` column.

use wire::frame::{DefectResult, LineState};

/// The v3 columns of one defect row.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct LineColumns {
    /// Some harmonic of the line was searched.
    pub searched: bool,
    /// Summed envelope amplitude of the counted harmonics, g.
    pub amplitude_g: Option<f64>,
    /// Harmonics searched.
    pub harmonics_searched: Option<u8>,
    /// Counted harmonics with a sideband pair.
    pub sidebands: Option<u8>,
    /// Strongest counted harmonic over its floor, dB.
    pub margin_db: Option<f64>,
}

fn finite(x: f32) -> Option<f64> {
    x.is_finite().then_some(f64::from(x))
}

/// The columns of `d` (v1 lines: searched, everything else NULL).
pub fn line_columns(d: &DefectResult) -> LineColumns {
    match &d.line {
        None => LineColumns {
            searched: true,
            amplitude_g: None,
            harmonics_searched: None,
            sidebands: None,
            margin_db: None,
        },
        Some(l) if l.state == LineState::NotSearched => LineColumns {
            searched: false,
            amplitude_g: None,
            harmonics_searched: Some(0),
            sidebands: None,
            margin_db: None,
        },
        Some(l) => LineColumns {
            searched: true,
            amplitude_g: finite(l.amplitude_g),
            harmonics_searched: Some(l.harmonics_searched),
            sidebands: Some(l.sidebands),
            margin_db: finite(l.margin_db),
        },
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use wire::frame::{LineDetail, NotSearchedCode};

    #[test]
    fn v1_v2_and_not_searched() {
        let v1 = DefectResult::default();
        assert!(line_columns(&v1).searched);
        assert_eq!(line_columns(&v1).amplitude_g, None);
        let mut d = DefectResult {
            harmonics: 3,
            ..DefectResult::default()
        };
        d.line = Some(LineDetail {
            state: LineState::Searched,
            amplitude_g: 0.5,
            harmonics_searched: 5,
            sidebands: 1,
            margin_db: 14.0,
            ..LineDetail::default()
        });
        let c = line_columns(&d);
        assert_eq!(
            c,
            LineColumns {
                searched: true,
                amplitude_g: Some(0.5),
                harmonics_searched: Some(5),
                sidebands: Some(1),
                margin_db: Some(14.0)
            }
        );
        d.line = Some(LineDetail {
            state: LineState::NotSearched,
            reason: Some(NotSearchedCode::TooSlow),
            amplitude_g: f32::NAN,
            margin_db: f32::NAN,
            ..LineDetail::default()
        });
        let c = line_columns(&d);
        assert!(!c.searched);
        assert_eq!((c.amplitude_g, c.margin_db), (None, None));
    }
}
