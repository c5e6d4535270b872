//! The dashboard's clock and labels; receive times are read and written by
//! the gateway's one RFC 3339 module (`gateway::timefmt`).

use crate::gateway::timefmt::civil_from_days;
pub use crate::gateway::timefmt::{
    format_minute as label, format_rfc3339 as rfc3339, parse_rfc3339_ms,
};

/// `YYYY-MM-DD` in UTC.
pub fn day_label(ms: i64) -> String {
    let (y, m, d) = civil_from_days(ms.div_euclid(86_400_000));
    format!("{y:04}-{m:02}-{d:02}")
}

/// Now, Unix milliseconds.
pub fn now_ms() -> i64 {
    std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map(|d| i64::try_from(d.as_millis()).unwrap_or(i64::MAX))
        .unwrap_or(0)
}

/// "3 h 20 min" style duration.
pub fn span(ms: i64) -> String {
    let m = ms.max(0) / 60_000;
    match m {
        0..=59 => format!("{m} min"),
        60..=2879 => format!("{} h {} min", m / 60, m % 60),
        _ => format!("{} d {} h", m / 1440, (m % 1440) / 60),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn unix_epoch_and_known_instants() {
        // 2000-01-01T00:00:00Z is 946684800 s after the epoch (the usual
        // Unix-time table; `date -u -d 2000-01-01 +%s` prints the same).
        assert_eq!(parse_rfc3339_ms("1970-01-01T00:00:00Z"), Some(0));
        assert_eq!(
            parse_rfc3339_ms("2000-01-01T00:00:00Z"),
            Some(946_684_800_000)
        );
        assert_eq!(
            parse_rfc3339_ms("2000-01-01T01:30:00+01:30"),
            Some(946_684_800_000)
        );
        assert_eq!(
            parse_rfc3339_ms("2024-02-29T12:00:00.25Z"),
            Some(1_709_208_000_250)
        );
        assert_eq!(parse_rfc3339_ms("2024-13-01T00:00:00Z"), None);
        assert_eq!(parse_rfc3339_ms("yesterday"), None);
        assert_eq!(rfc3339(1_709_208_000_250), "2024-02-29T12:00:00Z");
        assert_eq!(label(946_684_800_000), "2000-01-01 00:00");
    }
}
