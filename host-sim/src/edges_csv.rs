//! Tach edges from a CSV file, and writing them back.
//!
//! Format: one edge per line. The first non-blank, non-comment line is a
//! header naming the single column: `time_s` (seconds from the start of the
//! record) or `sample` (sample index, may be fractional). `#` starts a
//! comment running to the end of the line. Values must be finite, not
//! negative and strictly increasing; every error names its 1-based line.
//!
//! ```
//! use host_sim::edges_csv::{parse_edges_csv, EdgeUnit};
//! let e = parse_edges_csv("# tach\ntime_s\n0.04\n0.08 # second rev\n").unwrap();
//! assert_eq!(e.unit, EdgeUnit::Seconds);
//! assert_eq!(e.values, vec![0.04, 0.08]);
//! ```

use std::fmt;
use std::path::Path;

/// The unit a CSV's column is in, from its header.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum EdgeUnit {
    /// Header `time_s`: seconds.
    Seconds,
    /// Header `sample`: sample index at the record's sample rate.
    Samples,
}

/// Edges read from a CSV file.
#[derive(Debug, Clone, PartialEq)]
pub struct TachEdges {
    /// Unit of [`TachEdges::values`].
    pub unit: EdgeUnit,
    /// Edge positions, strictly increasing.
    pub values: Vec<f64>,
}

impl TachEdges {
    /// Edge times in seconds, using `fs_hz` to convert sample indices.
    pub fn to_seconds(&self, fs_hz: f64) -> Vec<f64> {
        match self.unit {
            EdgeUnit::Seconds => self.values.clone(),
            EdgeUnit::Samples => self.values.iter().map(|s| s / fs_hz).collect(),
        }
    }

    /// Edge positions in (fractional) samples, using `fs_hz` to convert times.
    pub fn to_samples(&self, fs_hz: f64) -> Vec<f64> {
        match self.unit {
            EdgeUnit::Seconds => self.values.iter().map(|t| t * fs_hz).collect(),
            EdgeUnit::Samples => self.values.clone(),
        }
    }
}

/// Why an edges CSV could not be read.
#[derive(Debug)]
pub enum EdgesCsvError {
    /// The file could not be read.
    Io(std::io::Error),
    /// No header line (the file is empty or only comments).
    NoHeader,
    /// The header is neither `time_s` nor `sample`.
    UnknownHeader {
        /// 1-based line number.
        line: usize,
        /// The text found.
        found: String,
    },
    /// More than one column on a line.
    ExtraColumns {
        /// 1-based line number.
        line: usize,
    },
    /// Not a number.
    BadNumber {
        /// 1-based line number.
        line: usize,
        /// The text found.
        text: String,
    },
    /// NaN or infinite.
    NonFinite {
        /// 1-based line number.
        line: usize,
    },
    /// A negative time or sample index.
    Negative {
        /// 1-based line number.
        line: usize,
        /// The value.
        value: f64,
    },
    /// Not strictly greater than the previous edge.
    NotIncreasing {
        /// 1-based line number.
        line: usize,
        /// Previous edge.
        previous: f64,
        /// This edge.
        value: f64,
    },
}

impl fmt::Display for EdgesCsvError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            EdgesCsvError::Io(e) => write!(f, "cannot read edges CSV: {e}"),
            EdgesCsvError::NoHeader => {
                write!(f, "no header line (expected `time_s` or `sample`)")
            }
            EdgesCsvError::UnknownHeader { line, found } => write!(
                f,
                "line {line}: header \"{found}\" is neither `time_s` nor `sample`"
            ),
            EdgesCsvError::ExtraColumns { line } => {
                write!(f, "line {line}: expected one value, found several columns")
            }
            EdgesCsvError::BadNumber { line, text } => {
                write!(f, "line {line}: \"{text}\" is not a number")
            }
            EdgesCsvError::NonFinite { line } => write!(f, "line {line}: value is not finite"),
            EdgesCsvError::Negative { line, value } => {
                write!(f, "line {line}: negative edge position {value}")
            }
            EdgesCsvError::NotIncreasing {
                line,
                previous,
                value,
            } => write!(
                f,
                "line {line}: edge {value} is not after the previous edge {previous}"
            ),
        }
    }
}

impl std::error::Error for EdgesCsvError {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match self {
            EdgesCsvError::Io(e) => Some(e),
            _ => None,
        }
    }
}

/// Reads an edges CSV file.
pub fn read_edges_csv(path: impl AsRef<Path>) -> Result<TachEdges, EdgesCsvError> {
    let text = std::fs::read_to_string(path).map_err(EdgesCsvError::Io)?;
    parse_edges_csv(&text)
}

/// Parses edges CSV text (see the module docs for the format).
pub fn parse_edges_csv(text: &str) -> Result<TachEdges, EdgesCsvError> {
    let mut unit: Option<EdgeUnit> = None;
    let mut values = Vec::new();
    for (i, raw) in text.lines().enumerate() {
        let line = i + 1;
        let content = raw.split('#').next().unwrap_or("").trim();
        // A trailing comma (spreadsheet export) is tolerated; real extra
        // columns are not.
        let content = content.strip_suffix(',').unwrap_or(content).trim();
        if content.is_empty() {
            continue;
        }
        if content.contains(',') || content.contains(';') || content.contains('\t') {
            return Err(EdgesCsvError::ExtraColumns { line });
        }
        if unit.is_none() {
            unit = Some(match content {
                "time_s" => EdgeUnit::Seconds,
                "sample" => EdgeUnit::Samples,
                _ => {
                    return Err(EdgesCsvError::UnknownHeader {
                        line,
                        found: content.to_string(),
                    })
                }
            });
            continue;
        }
        let value: f64 = content.parse().map_err(|_| EdgesCsvError::BadNumber {
            line,
            text: content.to_string(),
        })?;
        if !value.is_finite() {
            return Err(EdgesCsvError::NonFinite { line });
        }
        if value < 0.0 {
            return Err(EdgesCsvError::Negative { line, value });
        }
        if let Some(&previous) = values.last() {
            if value <= previous {
                return Err(EdgesCsvError::NotIncreasing {
                    line,
                    previous,
                    value,
                });
            }
        }
        values.push(value);
    }
    let unit = unit.ok_or(EdgesCsvError::NoHeader)?;
    Ok(TachEdges { unit, values })
}

/// Formats edge times (seconds) as an edges CSV with a `time_s` header and
/// an optional comment line first.
pub fn format_edges_csv(times_s: &[f64], comment: Option<&str>) -> String {
    let mut s = String::new();
    if let Some(c) = comment {
        for l in c.lines() {
            s.push_str("# ");
            s.push_str(l);
            s.push('\n');
        }
    }
    s.push_str("time_s\n");
    for t in times_s {
        // Rust's f64 Display is the shortest text that parses back exactly.
        s.push_str(&format!("{t}\n"));
    }
    s
}

/// Writes edge times (seconds) to a CSV file (see [`format_edges_csv`]).
pub fn write_edges_csv(
    path: impl AsRef<Path>,
    times_s: &[f64],
    comment: Option<&str>,
) -> std::io::Result<()> {
    std::fs::write(path, format_edges_csv(times_s, comment))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn reads_both_units_with_comments_and_blanks() {
        let e = parse_edges_csv("# from node 7\n\nsample\n100\n# gap\n200.5\n\n300,\n").unwrap();
        assert_eq!(e.unit, EdgeUnit::Samples);
        assert_eq!(e.values, vec![100.0, 200.5, 300.0]);
        assert_eq!(e.to_seconds(100.0), vec![1.0, 2.005, 3.0]);
        let t = parse_edges_csv("time_s\n0.5\n1.0").unwrap();
        assert_eq!(t.to_samples(1000.0), vec![500.0, 1000.0]);
    }

    #[test]
    fn errors_name_the_line() {
        let cases: [(&str, usize); 7] = [
            ("time\n1\n", 1),
            ("# c\ntime_s\n0.1\nabc\n", 4),
            ("time_s\n0.1\nNaN\n", 3),
            ("time_s\n0.1\ninf\n", 3),
            ("sample\n10\n10\n", 3),
            ("sample\n10\n5\n", 3),
            ("time_s\n-0.1\n", 2),
        ];
        for (text, line) in cases {
            let e = parse_edges_csv(text).unwrap_err();
            assert!(
                e.to_string().starts_with(&format!("line {line}:")),
                "{text:?}: {e}"
            );
        }
        assert!(matches!(
            parse_edges_csv("sample\n1\n2\n1.5\n"),
            Err(EdgesCsvError::NotIncreasing { line: 4, .. })
        ));
        assert!(matches!(
            parse_edges_csv("time_s\n1,2\n"),
            Err(EdgesCsvError::ExtraColumns { line: 2 })
        ));
        assert!(matches!(
            parse_edges_csv("# only\n\n"),
            Err(EdgesCsvError::NoHeader)
        ));
        assert!(matches!(
            read_edges_csv("/nonexistent/edges.csv"),
            Err(EdgesCsvError::Io(_))
        ));
    }

    #[test]
    fn format_round_trips_exactly() {
        let t = vec![0.1, 1.0 / 3.0, 2.000_000_000_000_1, 1e-9];
        let mut sorted = t.clone();
        sorted.sort_by(f64::total_cmp);
        let back = parse_edges_csv(&format_edges_csv(&sorted, Some("two\nlines"))).unwrap();
        assert_eq!(back.unit, EdgeUnit::Seconds);
        assert_eq!(back.values, sorted);
    }
}
