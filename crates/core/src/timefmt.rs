//! Timestamps on the wire: RFC 3339 text or epoch milliseconds, to and from epoch ms.
//! Pure (no clock): callers pass the time in.
//!
//! # References
//! - RFC 3339, Date and Time on the Internet: Timestamps (2002).
//! - H. Hinnant, "chrono-Compatible Low-Level Date Algorithms" (days from civil).

/// Days since 1970-01-01 of a proleptic Gregorian date.
pub fn days_from_civil(y: i64, m: u32, d: u32) -> i64 {
    let y = if m <= 2 { y - 1 } else { y };
    let era = if y >= 0 { y } else { y - 399 } / 400;
    let yoe = y - era * 400;
    let m = i64::from(m);
    let doy = (153 * (if m > 2 { m - 3 } else { m + 9 }) + 2) / 5 + i64::from(d) - 1;
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    era * 146_097 + doe - 719_468
}

/// (year, month, day) of days since 1970-01-01.
pub fn civil_from_days(z: i64) -> (i64, u32, u32) {
    let z = z + 719_468;
    let era = if z >= 0 { z } else { z - 146_096 } / 146_097;
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let y = yoe + era * 400;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = (doy - (153 * mp + 2) / 5 + 1) as u32;
    let m = if mp < 10 { mp + 3 } else { mp - 9 } as u32;
    (if m <= 2 { y + 1 } else { y }, m, d)
}

/// Parses `2026-12-01T21:48:45Z`, `2026-12-01T21:48:45.250+01:00`, `2026-12-01 21:48:45Z`.
pub fn parse_rfc3339(s: &str) -> Option<i64> {
    let b = s.trim().as_bytes();
    if b.len() < 20 {
        return None;
    }
    let num = |r: std::ops::Range<usize>| -> Option<i64> {
        let t = std::str::from_utf8(b.get(r)?).ok()?;
        if !t.bytes().all(|c| c.is_ascii_digit()) {
            return None;
        }
        t.parse().ok()
    };
    if b[4] != b'-'
        || b[7] != b'-'
        || !matches!(b[10], b'T' | b't' | b' ')
        || b[13] != b':'
        || b[16] != b':'
    {
        return None;
    }
    let (y, mo, d) = (num(0..4)?, num(5..7)?, num(8..10)?);
    let (h, mi, se) = (num(11..13)?, num(14..16)?, num(17..19)?);
    if !(1..=12).contains(&mo) || !(1..=31).contains(&d) || h > 23 || mi > 59 || se > 60 {
        return None;
    }
    let mut i = 19;
    let mut ms = 0i64;
    if b.get(i) == Some(&b'.') {
        i += 1;
        let start = i;
        while i < b.len() && b[i].is_ascii_digit() {
            i += 1;
        }
        if i == start {
            return None;
        }
        let frac = std::str::from_utf8(&b[start..i.min(start + 3)]).ok()?;
        ms = frac.parse::<i64>().ok()? * 10i64.pow(3 - frac.len() as u32);
    }
    let offset_min = match b.get(i)? {
        b'Z' | b'z' if i + 1 == b.len() => 0,
        c @ (b'+' | b'-') if i + 6 == b.len() && b[i + 3] == b':' => {
            let oh = num(i + 1..i + 3)?;
            let om = num(i + 4..i + 6)?;
            let v = oh * 60 + om;
            if *c == b'-' { -v } else { v }
        }
        _ => return None,
    };
    let days = days_from_civil(y, mo as u32, d as u32);
    Some(((days * 86_400 + h * 3600 + mi * 60 + se - offset_min * 60) * 1000) + ms)
}

/// Formats epoch milliseconds as `2026-12-01T21:48:45.250Z`.
pub fn format_rfc3339(ms: i64) -> String {
    let secs = ms.div_euclid(1000);
    let milli = ms.rem_euclid(1000);
    let (y, m, d) = civil_from_days(secs.div_euclid(86_400));
    let sod = secs.rem_euclid(86_400);
    if !(0..=9999).contains(&y) {
        return format!(
            "{y:04}-{m:02}-{d:02}T{:02}:{:02}:{:02}.{milli:03}Z",
            sod / 3600,
            (sod % 3600) / 60,
            sod % 60
        );
    }
    // Hot path (every result carries several timestamps): digits by hand.
    let mut b = [0u8; 24];
    let mut put = |at: usize, v: i64, width: usize| {
        let mut v = v;
        for k in (0..width).rev() {
            b[at + k] = b'0' + (v % 10) as u8;
            v /= 10;
        }
    };
    put(0, y, 4);
    put(5, i64::from(m), 2);
    put(8, i64::from(d), 2);
    put(11, sod / 3600, 2);
    put(14, (sod % 3600) / 60, 2);
    put(17, sod % 60, 2);
    put(20, milli, 3);
    for (at, c) in [
        (4, b'-'),
        (7, b'-'),
        (10, b'T'),
        (13, b':'),
        (16, b':'),
        (19, b'.'),
        (23, b'Z'),
    ] {
        b[at] = c;
    }
    String::from_utf8_lossy(&b).into_owned()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn round_trips_and_known_instants() {
        // 2026-12-01T00:00:00Z = 1 796 083 200 s after the epoch (20 788 days × 86 400 s;
        // computed with POSIX `date -u -d 2026-12-01 +%s`).
        assert_eq!(
            parse_rfc3339("2026-12-01T00:00:00Z"),
            Some(1_796_083_200_000)
        );
        assert_eq!(parse_rfc3339("1970-01-01T00:00:00Z"), Some(0));
        assert_eq!(
            parse_rfc3339("2026-12-01T01:00:00.5+01:00"),
            Some(1_796_083_200_500)
        );
        assert_eq!(
            parse_rfc3339("2000-02-29 12:00:00.123456Z"),
            Some(951_825_600_123)
        );
        for ms in [0, 951_825_600_123, 1_796_083_200_500, -86_400_000] {
            assert_eq!(parse_rfc3339(&format_rfc3339(ms)), Some(ms));
        }
        assert_eq!(
            format_rfc3339(1_796_083_200_500),
            "2026-12-01T00:00:00.500Z"
        );
    }

    #[test]
    fn refuses_bad_text() {
        for s in [
            "",
            "2026-13-01T00:00:00Z",
            "2026-12-01T00:00:00",
            "2026-12-01T25:00:00Z",
            "yesterday",
            "2026-12-01T00:00:00+0100",
        ] {
            assert_eq!(parse_rfc3339(s), None, "{s}");
        }
    }
}
