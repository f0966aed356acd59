//! Reading times written by people: ISO 8601 UTC and Julian dates with a scale.

use hifitime::{Epoch, Unit};

use super::{TimeError, epoch_from_tdb_j2000, epoch_from_tt_j2000, epoch_from_utc_calendar};

/// Reads an ISO 8601 UTC date and time.
///
/// Accepted: `YYYY-MM-DD`, `YYYY-MM-DDTHH:MM`, `YYYY-MM-DDTHH:MM:SS` and
/// `YYYY-MM-DDTHH:MM:SS.fff…` (up to nanoseconds; extra digits are rounded),
/// with `T` or one space between date and time, and an optional `Z` or
/// `+00:00`. Other UTC offsets are refused rather than silently applied.
///
/// ```
/// let e = latens::time::parse_utc_iso("2000-01-01T11:58:55.816Z").unwrap();
/// // 11:58:55.816 UTC on 2000-01-01 is J2000.0 TT (TT - UTC = 64.184 s).
/// // TDB - TT is -73 us then, under a nanoday.
/// assert!(latens::time::tdb_days_from_j2000(e).abs() < 1e-8);
/// ```
pub fn parse_utc_iso(text: &str) -> Result<Epoch, TimeError> {
    let err = |reason: &str| TimeError::Parse { text: text.to_string(), reason: reason.to_string() };
    let s = text.trim();
    let s = s.strip_suffix('Z').or_else(|| s.strip_suffix('z')).or_else(|| s.strip_suffix("+00:00")).unwrap_or(s);
    if s.get(10..).is_some_and(|rest| rest.contains(['+', '-'])) {
        return Err(err("only UTC is accepted: write the time with `Z` or without an offset"));
    }
    let (date, time) = match s.find(['T', 't', ' ']) {
        Some(i) => (&s[..i], Some(&s[i + 1..])),
        None => (s, None),
    };
    let parts: Vec<&str> = date.split('-').collect();
    if parts.len() != 3 || parts[0].len() != 4 || parts[1].len() != 2 || parts[2].len() != 2 {
        return Err(err("expected a date as YYYY-MM-DD"));
    }
    let year: i32 = digits(parts[0]).ok_or_else(|| err("the year is not a number"))? as i32;
    let month = digits(parts[1]).ok_or_else(|| err("the month is not a number"))? as u8;
    let day = digits(parts[2]).ok_or_else(|| err("the day is not a number"))? as u8;
    let (mut hour, mut minute, mut second, mut nanos) = (0u8, 0u8, 0u8, 0u32);
    if let Some(time) = time {
        let fields: Vec<&str> = time.split(':').collect();
        if !(2..=3).contains(&fields.len()) || fields[0].len() != 2 || fields[1].len() != 2 {
            return Err(err("expected a time of day as HH:MM or HH:MM:SS[.fff]"));
        }
        hour = digits(fields[0]).ok_or_else(|| err("the hour is not a number"))? as u8;
        minute = digits(fields[1]).ok_or_else(|| err("the minute is not a number"))? as u8;
        if let Some(sec) = fields.get(2) {
            let (whole, frac) = match sec.split_once('.') {
                Some((w, f)) => (w, f),
                None => (*sec, ""),
            };
            if whole.len() != 2 {
                return Err(err("seconds must have two digits before any decimal point"));
            }
            second = digits(whole).ok_or_else(|| err("the seconds are not a number"))? as u8;
            if !frac.is_empty() {
                if !frac.bytes().all(|b| b.is_ascii_digit()) {
                    return Err(err("the fraction of a second is not a number"));
                }
                // Round to the nanosecond.
                let f: f64 = format!("0.{frac}").parse().map_err(|_| err("bad fraction"))?;
                nanos = (f * 1e9).round() as u32;
                if nanos == 1_000_000_000 {
                    // Carry without building an impossible 60th second.
                    nanos = 999_999_999;
                }
            } else if sec.contains('.') {
                return Err(err("a decimal point must be followed by digits"));
            }
        }
    }
    epoch_from_utc_calendar(year, month, day, hour, minute, second, nanos)
        .map_err(|reason| TimeError::Impossible { text: text.to_string(), reason })
}

/// Reads a time as either ISO 8601 UTC (see [`parse_utc_iso`]) or a Julian
/// date with its scale: `JD 2451545.0 TDB`, `MJD 60000.25 UTC`, `JD 2451545 TT`.
///
/// A Julian date without a scale is refused: the scales differ by more than a
/// minute, which is too much to guess. The decimal digits of a Julian date are
/// kept exactly (the whole and fractional days are split as text), so a JD
/// written to 1e-9 day keeps its 0.1 ms.
///
/// In a UTC Julian date every day is taken as 86400 s long; a leap second
/// itself cannot be named that way (write it in ISO form).
pub fn parse_epoch(text: &str) -> Result<Epoch, TimeError> {
    let err = |reason: &str| TimeError::Parse { text: text.to_string(), reason: reason.to_string() };
    let tokens: Vec<&str> = text.split_whitespace().collect();
    let Some(first) = tokens.first() else {
        return Err(err("the time is empty"));
    };
    let kind = first.to_ascii_uppercase();
    if kind != "JD" && kind != "MJD" {
        return parse_utc_iso(text);
    }
    let (number, scale) = match tokens.as_slice() {
        [_, n, s] => (*n, s.to_ascii_uppercase()),
        [_, _] => {
            return Err(err("name the time scale after the date, e.g. `JD 2451545.0 TDB`"));
        }
        _ => {
            return Err(err("expected `JD <days> <UTC|TT|TDB>` or `MJD <days> <UTC|TT|TDB>`"));
        }
    };
    let (mut whole, mut frac) = split_decimal(number).ok_or_else(|| err("the day count is not a number"))?;
    if kind == "MJD" {
        // JD = MJD + 2400000.5
        whole += 2_400_000;
        frac += 0.5;
        if frac >= 1.0 {
            frac -= 1.0;
            whole += 1;
        }
    }
    let j2000 = 2_451_545_i64;
    match scale.as_str() {
        "TT" => Ok(epoch_from_tt_j2000(whole - j2000, frac * 86_400.0)),
        "TDB" => Ok(epoch_from_tdb_j2000(whole - j2000, frac * 86_400.0)),
        "UTC" => {
            // The civil day starts at JD x.5.
            let (mut day_number, mut day_frac) = (whole, frac + 0.5);
            if day_frac >= 1.0 {
                day_frac -= 1.0;
                day_number += 1;
            }
            let (y, m, d) = gregorian_from_day_number(day_number);
            let midnight = epoch_from_utc_calendar(y, m, d, 0, 0, 0, 0)
                .map_err(|reason| TimeError::Impossible { text: text.to_string(), reason })?;
            Ok(midnight + day_frac * 86_400.0 * Unit::Second)
        }
        other => Err(err(&format!("unknown time scale `{other}`: use UTC, TT or TDB"))),
    }
}

fn digits(s: &str) -> Option<u32> {
    if s.is_empty() || !s.bytes().all(|b| b.is_ascii_digit()) {
        return None;
    }
    s.parse().ok()
}

/// Splits decimal text into whole days (floor) and the fraction in [0, 1),
/// keeping every written digit.
fn split_decimal(text: &str) -> Option<(i64, f64)> {
    let value: f64 = text.parse().ok()?;
    if !value.is_finite() || value.abs() > 1e12 {
        return None;
    }
    if text.contains(['e', 'E']) {
        let whole = value.floor();
        return Some((whole as i64, value - whole));
    }
    let (neg, body) = match text.strip_prefix('-') {
        Some(b) => (true, b),
        None => (false, text.strip_prefix('+').unwrap_or(text)),
    };
    let (int_part, frac_part) = body.split_once('.').unwrap_or((body, ""));
    let mut whole: i64 = if int_part.is_empty() { 0 } else { int_part.parse().ok()? };
    let mut frac: f64 = if frac_part.is_empty() { 0.0 } else { format!("0.{frac_part}").parse().ok()? };
    if neg {
        whole = -whole;
        frac = -frac;
        if frac < 0.0 {
            whole -= 1;
            frac += 1.0;
        }
    }
    Some((whole, frac))
}

/// Gregorian calendar date of the civil day whose midnight is at
/// JD `day_number - 0.5` (Fliegel & Van Flandern 1968, Comm. ACM 11, 657).
fn gregorian_from_day_number(jd: i64) -> (i32, u8, u8) {
    let l = jd + 68_569;
    let n = 4 * l / 146_097;
    let l = l - (146_097 * n + 3) / 4;
    let i = 4000 * (l + 1) / 1_461_001;
    let l = l - 1461 * i / 4 + 31;
    let j = 80 * l / 2447;
    let day = l - 2447 * j / 80;
    let l = j / 11;
    let month = j + 2 - 12 * l;
    let year = 100 * (n - 49) + i + l;
    (year as i32, month as u8, day as u8)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::time::{tdb_days_from_j2000, tt_seconds_from_j2000};

    #[test]
    fn iso_forms_agree() {
        let a = parse_utc_iso("2020-05-17T03:04:05.5Z").unwrap();
        let b = parse_utc_iso("2020-05-17 03:04:05.500").unwrap();
        let c = parse_utc_iso("2020-05-17T03:04:05.500+00:00").unwrap();
        assert_eq!(a, b);
        assert_eq!(a, c);
        let d = parse_utc_iso("2020-05-17").unwrap();
        let e = parse_utc_iso("2020-05-17T00:00").unwrap();
        assert_eq!(d, e);
    }

    #[test]
    fn bad_iso_text_is_refused_with_a_reason() {
        for bad in [
            "",
            "2020-5-17",
            "2020-05-17T3:04",
            "2020-05-17T03:04:05.Z",
            "2020-05-17T03:04:05+02:00",
            "20200517",
            "2020-02-30",
            "2020-05-17T25:00:00",
            "tomorrow",
            "2020-05-17T03:04:5",
        ] {
            assert!(parse_utc_iso(bad).is_err(), "accepted `{bad}`");
        }
    }

    #[test]
    fn julian_date_forms() {
        // JD 2451545.0 TT is J2000.0 TT exactly.
        let e = parse_epoch("JD 2451545.0 TT").unwrap();
        assert!(tt_seconds_from_j2000(e).abs() < 1e-9);
        let f = parse_epoch("MJD 51544.5 TDB").unwrap();
        assert!(tdb_days_from_j2000(f).abs() < 1e-12);
        // JD 2451544.5 UTC is 2000-01-01T00:00:00 UTC.
        let g = parse_epoch("jd 2451544.5 utc").unwrap();
        assert_eq!(g, parse_utc_iso("2000-01-01T00:00:00Z").unwrap());
        let h = parse_epoch("JD 2451545.25 UTC").unwrap();
        assert_eq!(h, parse_utc_iso("2000-01-01T18:00:00Z").unwrap());
        assert!(parse_epoch("JD 2451545.0").is_err());
        assert!(parse_epoch("JD 2451545.0 GPS").is_err());
        assert!(parse_epoch("JD abc TT").is_err());
    }

    #[test]
    fn day_number_calendar_matches_known_dates() {
        // JD 2451545 is 2000-01-01 (noon); JD 2415021 is 1900-01-01 (Meeus,
        // Astronomical Algorithms, ch. 7, from memory).
        assert_eq!(gregorian_from_day_number(2_451_545), (2000, 1, 1));
        assert_eq!(gregorian_from_day_number(2_415_021), (1900, 1, 1));
        assert_eq!(gregorian_from_day_number(2_460_370), (2024, 2, 29));
    }

    #[test]
    fn decimal_split_keeps_digits() {
        let (w, f) = split_decimal("2451545.123456789").unwrap();
        assert_eq!(w, 2_451_545);
        assert!((f - 0.123_456_789).abs() < 1e-16);
        let (w, f) = split_decimal("-0.25").unwrap();
        assert_eq!((w, f), (-1, 0.75));
    }
}
