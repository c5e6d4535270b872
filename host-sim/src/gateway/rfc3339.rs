//! Receive times: RFC 3339 text (`2026-03-01T08:10:00.250Z`,
//! `...+01:00`) to milliseconds since the Unix epoch, and back.

/// Days since 1970-01-01 of a proleptic Gregorian date (H. Hinnant's
/// `days_from_civil`, from memory).
fn days_from_civil(y: i64, m: i64, d: i64) -> i64 {
    let y = if m <= 2 { y - 1 } else { y };
    let era = y.div_euclid(400);
    let yoe = y - era * 400;
    let mp = (m + 9) % 12;
    let doy = (153 * mp + 2) / 5 + d - 1;
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    era * 146_097 + doe - 719_468
}

fn num(s: &str, a: usize, b: usize) -> Option<i64> {
    let t = s.get(a..b)?;
    if !t.bytes().all(|c| c.is_ascii_digit()) {
        return None;
    }
    t.parse().ok()
}

/// Milliseconds since the Unix epoch of an RFC 3339 date-time, or None.
pub fn parse_ms(s: &str) -> Option<i64> {
    let b = s.as_bytes();
    if b.len() < 20 || b.get(4) != Some(&b'-') || b.get(7) != Some(&b'-') {
        return None;
    }
    if !matches!(b.get(10), Some(b'T' | b't' | b' '))
        || b.get(13) != Some(&b':')
        || b.get(16) != Some(&b':')
    {
        return None;
    }
    let (y, mo, d) = (num(s, 0, 4)?, num(s, 5, 7)?, num(s, 8, 10)?);
    let (h, mi, se) = (num(s, 11, 13)?, num(s, 14, 16)?, num(s, 17, 19)?);
    if !(1..=12).contains(&mo) || !(1..=31).contains(&d) || h > 23 || mi > 59 || se > 60 {
        return None;
    }
    let mut i = 19;
    let mut ms = 0i64;
    if b.get(i) == Some(&b'.') {
        i += 1;
        let start = i;
        while b.get(i).is_some_and(u8::is_ascii_digit) {
            i += 1;
        }
        let frac = s.get(start..i)?;
        if frac.is_empty() {
            return None;
        }
        let mut digits = frac
            .chars()
            .chain(std::iter::repeat('0'))
            .take(3)
            .collect::<String>();
        digits.truncate(3);
        ms = digits.parse().ok()?;
    }
    let offset_min = match b.get(i) {
        Some(b'Z' | b'z') if i + 1 == b.len() => 0,
        Some(sign @ (b'+' | b'-')) if i + 6 == b.len() && b.get(i + 3) == Some(&b':') => {
            let oh = num(s, i + 1, i + 3)?;
            let om = num(s, i + 4, i + 6)?;
            let m = oh * 60 + om;
            if *sign == b'-' {
                -m
            } else {
                m
            }
        }
        _ => return None,
    };
    let days = days_from_civil(y, mo, d);
    Some(((days * 24 + h) * 60 + mi - offset_min) * 60_000 + se * 1000 + ms)
}

/// RFC 3339 UTC text of milliseconds since the Unix epoch.
pub fn format_ms(ms: i64) -> String {
    let days = ms.div_euclid(86_400_000);
    let rem = ms.rem_euclid(86_400_000);
    // civil_from_days (H. Hinnant, from memory)
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    let y = yoe + era * 400 + i64::from(m <= 2);
    format!(
        "{y:04}-{m:02}-{d:02}T{:02}:{:02}:{:02}.{:03}Z",
        rem / 3_600_000,
        rem / 60_000 % 60,
        rem / 1000 % 60,
        rem % 1000
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn epoch_values() {
        // 2000-03-01T00:00:00Z is 951868800 s after the epoch (POSIX time, common practice).
        assert_eq!(parse_ms("2000-03-01T00:00:00Z"), Some(951_868_800_000));
        assert_eq!(parse_ms("1970-01-01T00:00:00.5Z"), Some(500));
        assert_eq!(parse_ms("1970-01-01T01:00:00+01:00"), Some(0));
        assert_eq!(parse_ms("2026-13-01T00:00:00Z"), None);
        assert_eq!(parse_ms("yesterday"), None);
        for ms in [0, 951_868_800_123, 1_790_000_000_000] {
            assert_eq!(parse_ms(&format_ms(ms)), Some(ms));
        }
    }
}
