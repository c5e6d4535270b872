//! Receive times: RFC 3339 text (as the input's receive-time token) to Unix
//! milliseconds, and milliseconds back to short UTC labels for tables and
//! plot axes. No time-zone database: only `Z` and numeric offsets.

/// Days since 1970-01-01 of a proleptic Gregorian date (the days-from-civil
/// algorithm published by H. Hinnant, "chrono-Compatible Low-Level Date
/// Algorithms").
fn days_from_civil(y: i64, m: i64, d: i64) -> i64 {
    let y = if m <= 2 { y - 1 } else { y };
    let era = y.div_euclid(400);
    let yoe = y - era * 400;
    let mp = (m + 9) % 12;
    let doy = (153 * mp + 2) / 5 + d - 1;
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    era * 146_097 + doe - 719_468
}

/// (year, month, day) of days since 1970-01-01 (inverse of [`days_from_civil`]).
pub(crate) fn civil_from_days(z: i64) -> (i64, i64, i64) {
    let z = z + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    (yoe + era * 400 + i64::from(m <= 2), m, d)
}

fn num(s: &str) -> Option<i64> {
    (!s.is_empty() && s.bytes().all(|b| b.is_ascii_digit()))
        .then(|| s.parse().ok())
        .flatten()
}

/// Unix milliseconds of an RFC 3339 date-time (`2026-05-02T10:00:00Z`,
/// `2026-05-02 10:00:00.250+02:00`); `None` for anything else.
pub fn parse_rfc3339_ms(t: &str) -> Option<i64> {
    let t = t.trim();
    let date = t.get(..10)?;
    let sep = t.get(10..11)?;
    if !matches!(sep, "T" | "t" | " ") {
        return None;
    }
    let rest = t.get(11..)?;
    let (y, mo, d) = (
        num(date.get(..4)?)?,
        num(date.get(5..7)?)?,
        num(date.get(8..10)?)?,
    );
    if date.get(4..5)? != "-" || date.get(7..8)? != "-" || !(1..=12).contains(&mo) {
        return None;
    }
    if !(1..=31).contains(&d) {
        return None;
    }
    let (h, mi, s) = (
        num(rest.get(..2)?)?,
        num(rest.get(3..5)?)?,
        num(rest.get(6..8)?)?,
    );
    if rest.get(2..3)? != ":" || rest.get(5..6)? != ":" || h > 23 || mi > 59 || s > 60 {
        return None;
    }
    let mut tail = rest.get(8..)?;
    let mut ms = 0i64;
    if let Some(frac) = tail.strip_prefix('.') {
        let n = frac.bytes().take_while(u8::is_ascii_digit).count();
        let digits = frac.get(..n)?;
        if n == 0 {
            return None;
        }
        let first3: String = digits.chars().chain("000".chars()).take(3).collect();
        ms = num(&first3)?;
        tail = frac.get(n..)?;
    }
    let offset_min = match tail {
        "Z" | "z" => 0,
        _ => {
            let sign = match tail.get(..1)? {
                "+" => 1,
                "-" => -1,
                _ => return None,
            };
            if tail.len() != 6 || tail.get(3..4)? != ":" {
                return None;
            }
            sign * (num(tail.get(1..3)?)? * 60 + num(tail.get(4..6)?)?)
        }
    };
    let secs = days_from_civil(y, mo, d) * 86_400 + h * 3600 + mi * 60 + s - offset_min * 60;
    Some(secs * 1000 + ms)
}

/// `YYYY-MM-DD HH:MM` (UTC) of Unix milliseconds.
pub fn format_minute(ms: i64) -> String {
    let secs = ms.div_euclid(1000);
    let (y, m, d) = civil_from_days(secs.div_euclid(86_400));
    let sod = secs.rem_euclid(86_400);
    format!(
        "{y:04}-{m:02}-{d:02} {:02}:{:02}",
        sod / 3600,
        (sod % 3600) / 60
    )
}

/// `YYYY-MM-DDTHH:MM:SSZ` of Unix milliseconds.
pub fn format_rfc3339(ms: i64) -> String {
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn known_instants() {
        // 2000-03-01 is day 11017 of the Unix epoch (python3:
        // datetime.date(2000,3,1) - datetime.date(1970,1,1)).
        assert_eq!(days_from_civil(2000, 3, 1), 11_017);
        assert_eq!(civil_from_days(11_017), (2000, 3, 1));
        // date -u -d 2026-05-02T10:00:00Z +%s -> 1777716000
        assert_eq!(
            parse_rfc3339_ms("2026-05-02T10:00:00Z"),
            Some(1_777_716_000_000)
        );
        assert_eq!(
            parse_rfc3339_ms("2026-05-02 12:00:00.25+02:00"),
            Some(1_777_716_000_250)
        );
        assert_eq!(format_rfc3339(1_777_716_000_000), "2026-05-02T10:00:00Z");
        assert_eq!(format_minute(1_777_716_000_000), "2026-05-02 10:00");
        for bad in [
            "",
            "2026-05-02",
            "2026-13-02T10:00:00Z",
            "x026-05-02T10:00:00Z",
            "2026-05-02T10:00:00",
        ] {
            assert_eq!(parse_rfc3339_ms(bad), None, "{bad}");
        }
    }
}
