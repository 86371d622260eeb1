//! Instants, fixed UTC offsets, durations and the ISO 8601 timestamp parser of the engine.
//!
//! Every instant is an `i64` count of microseconds since 1970-01-01T00:00:00Z (the precision
//! Spark's `TIMESTAMP` has, so both engines see the same numbers). Local days are days of a fixed
//! UTC offset: day `n` is the half-open interval `[n * 86 400 s - offset, (n + 1) * 86 400 s -
//! offset)`.

use serde::{Deserialize, Serialize};
use std::fmt;

/// Microseconds in one second.
pub const SECOND: i64 = 1_000_000;
/// Microseconds in one day.
pub const DAY: i64 = 86_400 * SECOND;

/// A fixed offset from UTC, used for day boundaries and for timestamps written without an offset.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
pub struct Offset {
    seconds: i32,
}

impl Offset {
    /// UTC.
    pub const UTC: Offset = Offset { seconds: 0 };

    /// An offset of `seconds` east of UTC, if within +-18 hours.
    pub fn from_seconds(seconds: i32) -> Option<Self> {
        (seconds.abs() <= 18 * 3600).then_some(Self { seconds })
    }

    /// Seconds east of UTC.
    pub fn seconds(self) -> i32 {
        self.seconds
    }

    /// Microseconds east of UTC.
    pub fn micros(self) -> i64 {
        i64::from(self.seconds) * SECOND
    }

    /// Parse `UTC`, `Z`, `+02:00`, `-05:30`, `+0200` or `+02`.
    pub fn parse(text: &str) -> Option<Self> {
        let t = text.trim();
        if t.eq_ignore_ascii_case("utc") || t == "Z" || t == "z" {
            return Some(Self::UTC);
        }
        let (secs, used) = parse_offset(t.as_bytes())?;
        (used == t.len()).then_some(())?;
        Self::from_seconds(secs)
    }

    /// The local day number (days since 1970-01-01 in this offset) of an instant.
    pub fn day_of(self, t: i64) -> i64 {
        (t + self.micros()).div_euclid(DAY)
    }

    /// The instant at which local day `day` begins.
    pub fn day_start(self, day: i64) -> i64 {
        day * DAY - self.micros()
    }
}

impl fmt::Display for Offset {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if self.seconds == 0 {
            return f.write_str("+00:00");
        }
        let sign = if self.seconds < 0 { '-' } else { '+' };
        let a = self.seconds.unsigned_abs();
        if a.is_multiple_of(60) {
            write!(f, "{sign}{:02}:{:02}", a / 3600, (a / 60) % 60)
        } else {
            write!(f, "{sign}{:02}:{:02}:{:02}", a / 3600, (a / 60) % 60, a % 60)
        }
    }
}

/// Days since 1970-01-01 of a proleptic Gregorian date (H. Hinnant's `days_from_civil`).
pub fn days_from_civil(y: i64, m: u32, d: u32) -> i64 {
    let y = if m <= 2 { y - 1 } else { y };
    let era = y.div_euclid(400);
    let yoe = y - era * 400;
    let m = i64::from(m);
    let doy = (153 * (if m > 2 { m - 3 } else { m + 9 }) + 2) / 5 + i64::from(d) - 1;
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    era * 146_097 + doe - 719_468
}

/// The date (year, month, day) of a day number (inverse of [`days_from_civil`]).
pub fn civil_from_days(z: i64) -> (i64, u32, u32) {
    let z = z + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let y = yoe + era * 400;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = (doy - (153 * mp + 2) / 5 + 1) as u32;
    let m = if mp < 10 { mp + 3 } else { mp - 9 } as u32;
    (if m <= 2 { y + 1 } else { y }, m, d)
}

fn is_leap(y: i64) -> bool {
    (y % 4 == 0 && y % 100 != 0) || y % 400 == 0
}

fn days_in_month(y: i64, m: u32) -> u32 {
    match m {
        1 | 3 | 5 | 7 | 8 | 10 | 12 => 31,
        4 | 6 | 9 | 11 => 30,
        2 if is_leap(y) => 29,
        _ => 28,
    }
}

fn digits(b: &[u8], at: usize, n: usize) -> Option<u32> {
    let s = b.get(at..at + n)?;
    let mut v = 0u32;
    for &c in s {
        if !c.is_ascii_digit() {
            return None;
        }
        v = v * 10 + u32::from(c - b'0');
    }
    Some(v)
}

/// Parse a UTC offset at the start of `b`: `+HH:MM`, `+HHMM`, `+HH`, `+HH:MM:SS`; returns the
/// offset in seconds and the number of bytes used.
fn parse_offset(b: &[u8]) -> Option<(i32, usize)> {
    let sign = match b.first()? {
        b'+' => 1,
        b'-' => -1,
        _ => return None,
    };
    let h = digits(b, 1, 2)?;
    let (m, s, used) = match b.get(3) {
        None => (0, 0, 3),
        Some(b':') => {
            let m = digits(b, 4, 2)?;
            match b.get(6) {
                None => (m, 0, 6),
                Some(b':') => (m, digits(b, 7, 2)?, 9),
                Some(_) => return None,
            }
        }
        Some(_) => (digits(b, 3, 2)?, 0, 5),
    };
    if h > 18 || m > 59 || s > 59 {
        return None;
    }
    let secs = i32::try_from(h * 3600 + m * 60 + s).ok()?;
    Some((sign * secs, used))
}

/// Parse an ISO 8601 timestamp into microseconds since the epoch.
///
/// Accepted layouts (the fast path is the fixed layout `YYYY-MM-DDTHH:MM:SS`):
/// `YYYY-MM-DD` (local midnight), `YYYY-MM-DDTHH:MM`, `YYYY-MM-DDTHH:MM:SS`, optionally a
/// fraction `.f` of 1 to 9 digits (digits beyond the sixth are dropped, as Spark does), and an
/// optional zone: `Z`, `+HH:MM`, `+HHMM`, `+HH`. A space may stand for the `T`. Without a zone the
/// time is read as local time of `local` (the analysis offset). Leading and trailing spaces are
/// ignored. Returns `None` for anything else, including impossible dates (2023-02-29) and
/// hour 24.
pub fn parse_timestamp(text: &str, local: Offset) -> Option<i64> {
    let b = text.trim().as_bytes();
    if b.len() < 10 || b[4] != b'-' || b[7] != b'-' {
        return None;
    }
    let y = i64::from(digits(b, 0, 4)?);
    let mo = digits(b, 5, 2)?;
    let d = digits(b, 8, 2)?;
    if !(1..=12).contains(&mo) || d == 0 || d > days_in_month(y, mo) {
        return None;
    }
    let day = days_from_civil(y, mo, d);
    let mut micros: i64 = 0;
    let mut i = 10;
    if b.len() > 10 {
        if b[10] != b'T' && b[10] != b't' && b[10] != b' ' {
            return None;
        }
        let h = digits(b, 11, 2)?;
        if b.get(13) != Some(&b':') {
            return None;
        }
        let mi = digits(b, 14, 2)?;
        i = 16;
        let mut s = 0;
        if b.get(16) == Some(&b':') {
            s = digits(b, 17, 2)?;
            i = 19;
            if b.get(19) == Some(&b'.') {
                let start = 20;
                let mut end = start;
                while end < b.len() && b[end].is_ascii_digit() {
                    end += 1;
                }
                let n = end - start;
                if n == 0 || n > 9 {
                    return None;
                }
                let keep = n.min(6);
                let mut frac = i64::from(digits(b, start, keep)?);
                for _ in keep..6 {
                    frac *= 10;
                }
                micros += frac;
                i = end;
            }
        }
        if h > 23 || mi > 59 || s > 59 {
            return None;
        }
        micros += (i64::from(h) * 3600 + i64::from(mi) * 60 + i64::from(s)) * SECOND;
    }
    let offset_secs = if i == b.len() {
        i64::from(local.seconds())
    } else if b[i] == b'Z' || b[i] == b'z' {
        if i + 1 != b.len() {
            return None;
        }
        0
    } else {
        if i == 10 {
            // A zone after a bare date is not accepted.
            return None;
        }
        let (secs, used) = parse_offset(&b[i..])?;
        if i + used != b.len() {
            return None;
        }
        i64::from(secs)
    };
    Some(day * DAY + micros - offset_secs * SECOND)
}

/// Write an instant as ISO 8601 in the given offset: `YYYY-MM-DDTHH:MM:SS[.ffffff]` followed by
/// `Z` for offset zero or `+HH:MM`; the fraction appears only when it is not zero.
pub fn format_timestamp(t: i64, offset: Offset) -> String {
    let local = t + offset.micros();
    let day = local.div_euclid(DAY);
    let rem = local.rem_euclid(DAY);
    let (y, m, d) = civil_from_days(day);
    let secs = rem / SECOND;
    let frac = rem % SECOND;
    let zone = if offset.seconds() == 0 { "Z".to_string() } else { offset.to_string() };
    if frac == 0 {
        format!("{y:04}-{m:02}-{d:02}T{:02}:{:02}:{:02}{zone}", secs / 3600, (secs / 60) % 60, secs % 60)
    } else {
        format!("{y:04}-{m:02}-{d:02}T{:02}:{:02}:{:02}.{frac:06}{zone}", secs / 3600, (secs / 60) % 60, secs % 60)
    }
}

/// Write a local day number as `YYYY-MM-DD`.
pub fn format_day(day: i64) -> String {
    let (y, m, d) = civil_from_days(day);
    format!("{y:04}-{m:02}-{d:02}")
}

/// Parse a duration: a positive or zero integer followed by `w` (weeks), `d` (days), `h`
/// (hours), `m` (minutes) or `s` (seconds), e.g. `14d`, `36h`. Returns microseconds.
pub fn parse_duration(text: &str) -> Option<i64> {
    let t = text.trim();
    let unit = t.chars().last()?;
    let per: i64 = match unit {
        'w' => 7 * DAY,
        'd' => DAY,
        'h' => 3600 * SECOND,
        'm' => 60 * SECOND,
        's' => SECOND,
        _ => return None,
    };
    let num = &t[..t.len() - 1];
    if num.is_empty() || !num.bytes().all(|c| c.is_ascii_digit()) || num.len() > 7 {
        return None;
    }
    num.parse::<i64>().ok()?.checked_mul(per)
}

/// Write a duration in the largest unit that divides it (`14d`, `36h`, `90m`, `5s`).
pub fn format_duration(micros: i64) -> String {
    if micros % DAY == 0 {
        format!("{}d", micros / DAY)
    } else if micros % (3600 * SECOND) == 0 {
        format!("{}h", micros / (3600 * SECOND))
    } else if micros % (60 * SECOND) == 0 {
        format!("{}m", micros / (60 * SECOND))
    } else if micros % SECOND == 0 {
        format!("{}s", micros / SECOND)
    } else {
        format!("{micros}us")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const H: i64 = 3600 * SECOND;

    #[test]
    fn civil_round_trip_and_known_days() {
        assert_eq!(days_from_civil(1970, 1, 1), 0);
        assert_eq!(days_from_civil(2000, 3, 1), 11_017);
        assert_eq!(days_from_civil(1969, 12, 31), -1);
        for z in [-800_000, -1, 0, 59, 60, 11_016, 19_782, 2_932_896] {
            let (y, m, d) = civil_from_days(z);
            assert_eq!(days_from_civil(y, m, d), z);
        }
    }

    #[test]
    fn parses_the_common_layouts() {
        let base = days_from_civil(2024, 3, 1) * DAY;
        let utc = Offset::UTC;
        assert_eq!(parse_timestamp("2024-03-01T00:00:00Z", utc), Some(base));
        assert_eq!(parse_timestamp("2024-03-01T10:30:15Z", utc), Some(base + 10 * H + 30 * 60 * SECOND + 15 * SECOND));
        assert_eq!(parse_timestamp("2024-03-01 10:30:15z", utc), Some(base + 10 * H + 1815 * SECOND));
        assert_eq!(parse_timestamp("2024-03-01T10:30Z", utc), Some(base + 10 * H + 1800 * SECOND));
        assert_eq!(parse_timestamp("2024-03-01", utc), Some(base));
        assert_eq!(parse_timestamp("  2024-03-01T00:00:00+02:00 ", utc), Some(base - 2 * H));
        assert_eq!(parse_timestamp("2024-03-01T00:00:00-0530", utc), Some(base + 5 * H + 30 * 60 * SECOND));
        assert_eq!(parse_timestamp("2024-03-01T00:00:00+01", utc), Some(base - H));
        assert_eq!(parse_timestamp("2024-03-01T00:00:00.5Z", utc), Some(base + 500_000));
        assert_eq!(parse_timestamp("2024-03-01T00:00:00.123456789Z", utc), Some(base + 123_456));
        // Local time of the analysis offset when no zone is written.
        let plus2 = Offset::parse("+02:00").unwrap();
        assert_eq!(parse_timestamp("2024-03-01T00:00:00", plus2), Some(base - 2 * H));
        assert_eq!(parse_timestamp("2024-03-01", plus2), Some(base - 2 * H));
        assert_eq!(parse_timestamp("2024-02-29T12:00:00Z", utc), Some(days_from_civil(2024, 2, 29) * DAY + 12 * H));
        assert_eq!(parse_timestamp("1969-12-31T23:59:59Z", utc), Some(-SECOND));
    }

    #[test]
    fn rejects_malformed_text() {
        let utc = Offset::UTC;
        for bad in [
            "",
            "2024-3-01",
            "2024-03-01T",
            "2024-03-01T24:00:00Z",
            "2024-03-01T10:60:00Z",
            "2023-02-29T00:00:00Z",
            "2024-13-01",
            "2024-00-10",
            "2024-03-00",
            "2024-03-01T10:00:00ZZ",
            "2024-03-01T10:00:00+2",
            "2024-03-01T10:00:00+19:00",
            "2024-03-01T10:00:00.Z",
            "2024-03-01+02:00",
            "2024/03/01",
            "yesterday",
            "2024-03-01T10:00:00.1234567890Z",
        ] {
            assert_eq!(parse_timestamp(bad, utc), None, "{bad}");
        }
    }

    #[test]
    fn formats_and_days() {
        let plus2 = Offset::parse("+02:00").unwrap();
        let t = parse_timestamp("2024-03-01T23:30:00Z", Offset::UTC).unwrap();
        assert_eq!(format_timestamp(t, Offset::UTC), "2024-03-01T23:30:00Z");
        assert_eq!(format_timestamp(t, plus2), "2024-03-02T01:30:00+02:00");
        assert_eq!(format_timestamp(t + 250_000, Offset::UTC), "2024-03-01T23:30:00.250000Z");
        assert_eq!(plus2.day_of(t), days_from_civil(2024, 3, 2));
        assert_eq!(Offset::UTC.day_of(t), days_from_civil(2024, 3, 1));
        assert_eq!(plus2.day_start(days_from_civil(2024, 3, 2)), t - 90 * 60 * SECOND);
        assert_eq!(format_day(days_from_civil(2024, 3, 2)), "2024-03-02");
        assert_eq!(Offset::parse("-05:30").unwrap().seconds(), -19_800);
        assert_eq!(Offset::parse("-05:30").unwrap().to_string(), "-05:30");
        assert_eq!(Offset::parse("UTC"), Some(Offset::UTC));
        assert_eq!(Offset::parse("+2"), None);
    }

    #[test]
    fn durations() {
        assert_eq!(parse_duration("14d"), Some(14 * DAY));
        assert_eq!(parse_duration("2w"), Some(14 * DAY));
        assert_eq!(parse_duration("36h"), Some(36 * H));
        assert_eq!(parse_duration("0d"), Some(0));
        assert_eq!(parse_duration("d"), None);
        assert_eq!(parse_duration("-3d"), None);
        assert_eq!(parse_duration("3x"), None);
        assert_eq!(format_duration(14 * DAY), "14d");
        assert_eq!(format_duration(36 * H), "36h");
    }
}
