//! The `[report]` section of a point file: when the node sends a full
//! report frame rather than the reduced one (reports by exception,
//! `wire::exception`).
//!
//! ```toml
//! [report]
//! full_margin_db = 3.0   # a finding that moved this much sends a full frame
//! full_every = 24        # and a full frame at least every 24 cycles
//! ```
//!
//! Both keys are optional; the defaults are `ReportPolicy::default()`. The
//! node's configuration record does not carry them yet: the node uses the
//! same defaults, and host tools (`envord energy`) read them from here.

use std::path::Path;

use serde::Deserialize;
use wire::exception::{PolicyError, ReportPolicy};

use crate::error::CliError;

/// The `[report]` section as written.
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ReportSection {
    /// `report.full_margin_db`.
    pub full_margin_db: Option<f32>,
    /// `report.full_every`.
    pub full_every: Option<u16>,
}

/// Why a `[report]` section is refused: a key's value out of range.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct SectionError(pub PolicyError);

impl std::fmt::Display for SectionError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let e = self.0;
        let key = match e {
            PolicyError::Margin => "report.full_margin_db",
            PolicyError::FullEvery => "report.full_every",
        };
        write!(f, "{key}: {e}")
    }
}

impl std::error::Error for SectionError {}

/// Why the `[report]` section of point-file text is refused.
#[derive(Clone, Debug, PartialEq)]
pub enum ReportTextError {
    /// Not TOML, or a key of the section unknown or of the wrong type (the parser's message).
    Toml(toml::de::Error),
    /// A key's value out of range.
    Section(SectionError),
}

impl std::fmt::Display for ReportTextError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            ReportTextError::Toml(e) => write!(f, "{e}"),
            ReportTextError::Section(e) => write!(f, "{e}"),
        }
    }
}

impl std::error::Error for ReportTextError {}

/// The policy of a section (defaults for missing keys); the error names the key.
pub fn from_section(s: &ReportSection) -> Result<ReportPolicy, SectionError> {
    let mut p = ReportPolicy::default();
    if let Some(v) = s.full_margin_db {
        p.margin_db = v;
    }
    if let Some(v) = s.full_every {
        p.full_every = v;
    }
    p.validate().map_err(SectionError)?;
    Ok(p)
}

/// The policy of point-file text (only its `[report]` section is read here;
/// `crate::point::parse` checks the rest).
pub fn parse(text: &str) -> Result<ReportPolicy, ReportTextError> {
    #[derive(Deserialize)]
    struct Only {
        #[serde(default)]
        report: ReportSection,
    }
    let only: Only = toml::from_str(text).map_err(ReportTextError::Toml)?;
    from_section(&only.report).map_err(ReportTextError::Section)
}

/// Reads the policy of a point file.
pub fn load(path: &Path) -> Result<ReportPolicy, CliError> {
    let text = std::fs::read_to_string(path)
        .map_err(|e| CliError::input(path.display(), format!("cannot read point file: {e}")))?;
    parse(&text).map_err(|m| CliError::input(path.display(), m))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn defaults_and_keys() {
        assert_eq!(parse("").unwrap(), ReportPolicy::default());
        let p = parse(
            "[sensor]\nsample_rate_hz = 25600.0\n[report]\nfull_margin_db = 2.0\nfull_every = 6\n",
        )
        .unwrap();
        assert_eq!((p.margin_db, p.full_every), (2.0, 6));
        let e = parse("[report]\nfull_every = 0\n").unwrap_err().to_string();
        assert!(e.starts_with("report.full_every"), "{e}");
        let e = parse("[report]\nfull_margin_db = -1.0\n")
            .unwrap_err()
            .to_string();
        assert!(e.starts_with("report.full_margin_db"), "{e}");
        let e = parse("[report]\nmargin = 1.0\n").unwrap_err().to_string();
        assert!(e.contains("margin"), "{e}");
        // and the point file accepts the section (and refuses a bad one)
        assert!(crate::point::parse("[report]\nfull_every = 12\n").is_ok());
        let e = crate::point::parse("[report]\nfull_every = 0\n")
            .unwrap_err()
            .to_string();
        assert!(e.contains("report.full_every"), "{e}");
    }
}
