//! Receive times: RFC 3339 text (as `gateway import` stores it) to Unix
//! milliseconds and back to a short UTC label. No time-zone database needed.

/// Days since 1970-01-01 of a proleptic Gregorian date (H. Hinnant's
/// `days_from_civil`, a published algorithm).
fn days_from_civil(y: i64, m: i64, d: i64) -> i64 {
    let y = if m <= 2 { y - 1 } else { y };
    let era = y.div_euclid(400);
    let yoe = y - era * 400;
    let mp = (m + 9) % 12;
    let doy = (153 * mp + 2) / 5 + d - 1;
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    era * 146_097 + doe - 719_468
}

/// Inverse of [`days_from_civil`].
fn civil_from_days(z: i64) -> (i64, i64, i64) {
    let z = z + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    let y = yoe + era * 400 + i64::from(m <= 2);
    (y, m, d)
}

fn num(s: &str) -> Option<i64> {
    (!s.is_empty() && s.bytes().all(|c| c.is_ascii_digit()))
        .then(|| s.parse().ok())
        .flatten()
}

/// Parses `YYYY-MM-DDTHH:MM:SS[.fff](Z|+hh:mm|-hh:mm)` (a space may stand for
/// the `T`) to Unix milliseconds; None for anything else.
pub fn parse_rfc3339_ms(s: &str) -> Option<i64> {
    let s = s.trim();
    let date = s.get(0..10)?;
    let sep = s.get(10..11)?;
    if sep != "T" && sep != "t" && sep != " " {
        return None;
    }
    let rest = s.get(11..)?;
    let (y, mo, d) = (
        num(date.get(0..4)?)?,
        num(date.get(5..7)?)?,
        num(date.get(8..10)?)?,
    );
    if date.get(4..5)? != "-"
        || date.get(7..8)? != "-"
        || !(1..=12).contains(&mo)
        || !(1..=31).contains(&d)
    {
        return None;
    }
    let (h, mi, se) = (
        num(rest.get(0..2)?)?,
        num(rest.get(3..5)?)?,
        num(rest.get(6..8)?)?,
    );
    if rest.get(2..3)? != ":" || rest.get(5..6)? != ":" || h > 23 || mi > 59 || se > 60 {
        return None;
    }
    let mut tail = rest.get(8..)?;
    let mut frac_ms = 0i64;
    if let Some(f) = tail.strip_prefix('.') {
        let digits: String = f.chars().take_while(char::is_ascii_digit).collect();
        if digits.is_empty() {
            return None;
        }
        let ms3: String = digits.chars().chain("000".chars()).take(3).collect();
        frac_ms = num(&ms3)?;
        tail = f.get(digits.len()..)?;
    }
    let offset_min = match tail {
        "Z" | "z" => 0,
        t if t.len() == 6
            && (t.starts_with('+') || t.starts_with('-'))
            && t.get(3..4) == Some(":") =>
        {
            let v = num(t.get(1..3)?)? * 60 + num(t.get(4..6)?)?;
            if t.starts_with('-') {
                -v
            } else {
                v
            }
        }
        _ => return None,
    };
    let secs = days_from_civil(y, mo, d) * 86_400 + h * 3600 + mi * 60 + se - offset_min * 60;
    Some(secs * 1000 + frac_ms)
}

/// `YYYY-MM-DD HH:MM` in UTC.
pub fn label(ms: i64) -> String {
    let secs = ms.div_euclid(1000);
    let (y, m, d) = civil_from_days(secs.div_euclid(86_400));
    let sod = secs.rem_euclid(86_400);
    format!(
        "{y:04}-{m:02}-{d:02} {:02}:{:02}",
        sod / 3600,
        (sod % 3600) / 60
    )
}

/// `YYYY-MM-DD` in UTC.
pub fn day_label(ms: i64) -> String {
    let (y, m, d) = civil_from_days(ms.div_euclid(86_400_000));
    format!("{y:04}-{m:02}-{d:02}")
}

/// RFC 3339 text in UTC (seconds).
pub fn rfc3339(ms: i64) -> String {
    let secs = ms.div_euclid(1000);
    let (y, m, d) = civil_from_days(secs.div_euclid(86_400));
    let sod = secs.rem_euclid(86_400);
    format!(
        "{y:04}-{m:02}-{d:02}T{:02}:{:02}:{:02}Z",
        sod / 3600,
        (sod % 3600) / 60,
        sod % 60
    )
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
