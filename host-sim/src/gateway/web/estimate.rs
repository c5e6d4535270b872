//! A rough time to reach the danger level: the Theil-Sen slope (median of
//! pairwise slopes; Sen 1968, Theil 1950) of the last reports, extended to
//! the danger level. It is shown as an estimate with a caution and hidden
//! when the trend is flat or too short.

/// Reports the estimate uses (the newest ones).
pub const WINDOW: usize = 30;
/// Fewer valid reports than this: no estimate.
pub const MIN_POINTS: usize = 8;
/// A slower rise than this (dB per day) is read as flat: no estimate.
pub const FLAT_DB_PER_DAY: f64 = 0.05;

fn median(v: &mut [f64]) -> Option<f64> {
    if v.is_empty() {
        return None;
    }
    v.sort_by(f64::total_cmp);
    let n = v.len();
    let hi = v.get(n / 2).copied()?;
    if n % 2 == 1 {
        Some(hi)
    } else {
        Some((v.get(n / 2 - 1).copied()? + hi) / 2.0)
    }
}

/// Theil-Sen fit of `(x, y)`: (slope, intercept), intercept as the median of
/// `y - slope x`. None with fewer than two distinct x.
pub fn theil_sen(pts: &[(f64, f64)]) -> Option<(f64, f64)> {
    let mut slopes = Vec::with_capacity(pts.len() * pts.len() / 2);
    for (i, a) in pts.iter().enumerate() {
        for b in pts.iter().skip(i + 1) {
            let dx = b.0 - a.0;
            if dx != 0.0 {
                slopes.push((b.1 - a.1) / dx);
            }
        }
    }
    let slope = median(&mut slopes)?;
    let mut icpt: Vec<f64> = pts.iter().map(|p| p.1 - slope * p.0).collect();
    Some((slope, median(&mut icpt)?))
}

/// Outcome of the estimate for one series.
#[derive(Clone, Debug, PartialEq, serde::Serialize)]
#[serde(tag = "result", rename_all = "snake_case")]
pub enum Eta {
    /// Too few reports or too short a span.
    TooShort {
        /// Valid reports available.
        points: usize,
    },
    /// Flat or falling.
    Flat {
        /// Slope, dB per day.
        db_per_day: f64,
    },
    /// Already at or over the danger level on the fitted line.
    AtDanger,
    /// Days until the fitted line reaches the danger level.
    Days {
        /// Estimated days from the newest report.
        days: f64,
        /// Slope, dB per day.
        db_per_day: f64,
        /// Reports used.
        points: usize,
    },
}

/// Estimate from `(time_ms, score_db)` points in time order and a danger level.
pub fn time_to_danger(series: &[(i64, f64)], danger_db: f64) -> Eta {
    let tail = series
        .get(series.len().saturating_sub(WINDOW)..)
        .unwrap_or(&[]);
    let (Some(first), Some(last)) = (tail.first(), tail.last()) else {
        return Eta::TooShort { points: 0 };
    };
    let day = 86_400_000.0;
    #[allow(clippy::cast_precision_loss)]
    let pts: Vec<(f64, f64)> = tail
        .iter()
        .map(|(t, y)| ((t - first.0) as f64 / day, *y))
        .collect();
    #[allow(clippy::cast_precision_loss)]
    let span_days = (last.0 - first.0) as f64 / day;
    if tail.len() < MIN_POINTS || span_days <= 0.0 {
        return Eta::TooShort { points: tail.len() };
    }
    let Some((slope, icpt)) = theil_sen(&pts) else {
        return Eta::TooShort { points: tail.len() };
    };
    let now_fit = icpt + slope * span_days;
    if now_fit >= danger_db {
        return Eta::AtDanger;
    }
    if slope < FLAT_DB_PER_DAY {
        return Eta::Flat { db_per_day: slope };
    }
    Eta::Days {
        days: (danger_db - now_fit) / slope,
        db_per_day: slope,
        points: tail.len(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn theil_sen_ignores_one_outlier() {
        // Worked by hand from the definition (Sen 1968): pairwise slopes are
        // six 1's and 10, 13, 19, 37; their median is 1; intercepts
        // y - x = 0, 0, 0, 0, 36 have median 0.
        let pts = [(0.0, 0.0), (1.0, 1.0), (2.0, 2.0), (3.0, 3.0), (4.0, 40.0)];
        assert_eq!(theil_sen(&pts), Some((1.0, 0.0)));
    }

    #[test]
    fn eta_rising_flat_short() {
        let day = 86_400_000;
        // 1 dB per day from 0 dB, danger 20 dB: newest point (day 9) at 9 dB -> 11 days.
        let rising: Vec<(i64, f64)> = (0..10).map(|i| (i * day, i as f64)).collect();
        match time_to_danger(&rising, 20.0) {
            Eta::Days {
                days,
                db_per_day,
                points,
            } => {
                assert!((days - 11.0).abs() < 1e-9 && (db_per_day - 1.0).abs() < 1e-9);
                assert_eq!(points, 10);
            }
            e => panic!("{e:?}"),
        }
        let flat: Vec<(i64, f64)> = (0..10).map(|i| (i * day, 5.0)).collect();
        assert!(matches!(time_to_danger(&flat, 20.0), Eta::Flat { .. }));
        assert_eq!(
            time_to_danger(&rising[..4], 20.0),
            Eta::TooShort { points: 4 }
        );
        assert_eq!(time_to_danger(&rising, 5.0), Eta::AtDanger);
    }
}
