//! ISO 8601 calendar dates and date-times (`2016-07-02`, `2016-07-02T14:30`,
//! `2016-07-02 14:30:05.5Z`, `2016-07-02T14:30:05+02:00`), turned into numbers a network can use.

/// A parsed date or date-time, in UTC.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct DateParts {
    /// Days since 1970-01-01 (with the time of day as a fraction).
    pub days: f64,
    /// Day of the year, 1 to 366.
    pub day_of_year: u32,
    /// Day of the week, 0 = Monday to 6 = Sunday.
    pub weekday: u32,
    /// Seconds since midnight.
    pub seconds: f64,
    /// The text had a time of day.
    pub has_time: bool,
}

impl DateParts {
    /// Position in the year as a fraction of a turn (0 at 1 January).
    pub fn year_turn(&self) -> f64 {
        (f64::from(self.day_of_year - 1) + self.seconds / 86_400.0) / 365.25
    }

    /// Position in the week as a fraction of a turn (0 at Monday midnight).
    pub fn week_turn(&self) -> f64 {
        (f64::from(self.weekday) + self.seconds / 86_400.0) / 7.0
    }

    /// Position in the day as a fraction of a turn.
    pub fn day_turn(&self) -> f64 {
        self.seconds / 86_400.0
    }
}

/// Parses an ISO 8601 date (`YYYY-MM-DD`) or date-time (date, `T` or a space, `HH:MM`,
/// optional `:SS` with fraction, optional `Z` or `±HH:MM` offset); None if it is not one.
pub fn parse_iso_date(text: &str) -> Option<DateParts> {
    let b = text.as_bytes();
    if b.len() < 10 || b[4] != b'-' || b[7] != b'-' {
        return None;
    }
    let year = digits(&b[0..4])? as i64;
    let month = digits(&b[5..7])?;
    let day = digits(&b[8..10])?;
    if !(1..=12).contains(&month) || day == 0 || day > days_in_month(year, month) {
        return None;
    }
    let (seconds, offset, has_time) = if b.len() == 10 {
        (0.0, 0.0, false)
    } else {
        if b[10] != b'T' && b[10] != b' ' {
            return None;
        }
        let (s, o) = parse_time(&text[11..])?;
        (s, o, true)
    };
    let civil = days_from_civil(year, month, day);
    Some(date_parts(
        civil as f64 + (seconds - offset) / 86_400.0,
        has_time,
    ))
}

/// The parts of a moment given as days since 1970-01-01 (UTC).
pub fn date_parts(days: f64, has_time: bool) -> DateParts {
    let whole = days.floor() as i64;
    let seconds = (days - whole as f64) * 86_400.0;
    let (year, _, _) = civil_from_days(whole);
    DateParts {
        days,
        day_of_year: (whole - days_from_civil(year, 1, 1)) as u32 + 1,
        // 1970-01-01 was a Thursday (weekday 3).
        weekday: (whole + 3).rem_euclid(7) as u32,
        seconds,
        has_time,
    }
}

/// `HH:MM[:SS[.fff]][Z|±HH:MM]` → (seconds since midnight, offset in seconds).
fn parse_time(t: &str) -> Option<(f64, f64)> {
    let b = t.as_bytes();
    if b.len() < 5 || b[2] != b':' {
        return None;
    }
    let hour = digits(&b[0..2])?;
    let minute = digits(&b[3..5])?;
    if hour > 23 || minute > 59 {
        return None;
    }
    let mut rest = &t[5..];
    let mut second = 0.0;
    if let Some(after) = rest.strip_prefix(':') {
        let end = after
            .find(|c: char| !(c.is_ascii_digit() || c == '.'))
            .unwrap_or(after.len());
        let text = &after[..end];
        if text.len() < 2 || !text.as_bytes()[..2].iter().all(u8::is_ascii_digit) {
            return None;
        }
        second = text.parse::<f64>().ok().filter(|s| *s < 61.0)?;
        rest = &after[end..];
    }
    let offset = match rest {
        "" | "Z" => 0.0,
        _ => {
            let sign = match rest.as_bytes()[0] {
                b'+' => 1.0,
                b'-' => -1.0,
                _ => return None,
            };
            let o = &rest.as_bytes()[1..];
            if o.len() != 5 || o[2] != b':' {
                return None;
            }
            let (h, m) = (digits(&o[0..2])?, digits(&o[3..5])?);
            if h > 23 || m > 59 {
                return None;
            }
            sign * f64::from(h * 3600 + m * 60)
        }
    };
    Some((f64::from(hour * 3600 + minute * 60) + second, offset))
}

fn digits(b: &[u8]) -> Option<u32> {
    b.iter().try_fold(0u32, |acc, &c| {
        c.is_ascii_digit().then(|| acc * 10 + u32::from(c - b'0'))
    })
}

fn is_leap(year: i64) -> bool {
    (year % 4 == 0 && year % 100 != 0) || year % 400 == 0
}

fn days_in_month(year: i64, month: u32) -> u32 {
    match month {
        2 if is_leap(year) => 29,
        2 => 28,
        4 | 6 | 9 | 11 => 30,
        _ => 31,
    }
}

/// Days since 1970-01-01 of a proleptic Gregorian date (the era-based algorithm, written
/// from memory; tests check it against a date crate).
fn days_from_civil(year: i64, month: u32, day: u32) -> i64 {
    let y = if month <= 2 { year - 1 } else { year };
    let era = y.div_euclid(400);
    let yoe = y - era * 400;
    let m = i64::from(month);
    let doy = (153 * (if m > 2 { m - 3 } else { m + 9 }) + 2) / 5 + i64::from(day) - 1;
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    era * 146_097 + doe - 719_468
}

/// The (year, month, day) of a day number (days since 1970-01-01).
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
