//! Time scales: parsing UTC and Julian dates, and UTC -> TT -> TDB.
//!
//! Latens works in TDB. Every `Epoch` Latens builds is kept on hifitime's TAI
//! scale (physical SI seconds, so differences are true durations); TT is
//! TAI + 32.184 s, and TDB comes from TT by the series in
//! [`tdb_minus_tt_seconds`]. Hot paths take **TDB days since J2000.0** as an `f64`
//! (J2000.0 = 2000-01-01T12:00:00 TDB = JD 2451545.0 TDB); at the edges times
//! are `hifitime::Epoch` values, which carry their scale. A function that
//! returns "a Julian date" without naming the scale does not exist here.
//!
//! # UTC before 1972
//! Leap-second UTC began on 1972-01-01, when TAI - UTC was 10 s. Before that,
//! UTC ran on "rubber" seconds with fractional steps (1961-1971) and did not
//! exist at all before 1961. Latens holds TAI - UTC at **10 s for every instant
//! before 1972-01-01**, so TT = UTC + 42.184 s there. This is the choice skyfield
//! makes, so our fixtures agree with it, and it keeps the scale continuous and
//! monotonic. It differs from the historical rubber UTC by up to 8.6 s
//! (1961-1971: ERFA's eraDat gives TAI - UTC from 1.42 s to 9.89 s) and, for
//! pre-1961 observations reported in Universal Time, by the then unknown Delta T
//! (about -3 s in 1900 to +32 s in 1960). Anyone reducing old astrometry should
//! convert such times to TT themselves and give them as `JD ... TT`.
//!
//! hifitime on its own counts TAI - UTC = 0 before 1972, a 10 s jump; Latens
//! does not use its pre-1972 UTC for that reason.

mod parse;

pub use parse::{parse_epoch, parse_utc_iso};

use hifitime::{Duration, Epoch, TimeScale, Unit};

use crate::units::DAY_S;

/// TAI - UTC in seconds that Latens uses for all instants before 1972-01-01.
pub const TAI_MINUS_UTC_BEFORE_1972_S: f64 = 10.0;

/// Errors from reading or converting times.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum TimeError {
    #[error("cannot read `{text}` as a time: {reason}")]
    Parse { text: String, reason: String },
    #[error("`{text}` is not a real calendar date and time: {reason}")]
    Impossible { text: String, reason: String },
}

/// The instant at which leap-second UTC starts, 1972-01-01T00:00:00 UTC,
/// expressed in TAI (TAI - UTC was 10 s then).
fn utc_start_in_tai() -> Epoch {
    Epoch::from_gregorian(1972, 1, 1, 0, 0, 10, 0, TimeScale::TAI)
}

/// Builds an epoch from a UTC calendar date and time of day, applying Latens's
/// pre-1972 rule (see the module documentation). `second` may be 60 only at a
/// real leap second.
pub fn epoch_from_utc_calendar(
    year: i32,
    month: u8,
    day: u8,
    hour: u8,
    minute: u8,
    second: u8,
    nanos: u32,
) -> Result<Epoch, String> {
    if !(1..=12).contains(&month) {
        return Err(format!("month {month} is not in 1..12"));
    }
    let days_in_month = days_in_month(year, month);
    if day == 0 || day > days_in_month {
        return Err(format!("day {day} does not exist in {year:04}-{month:02}"));
    }
    if hour > 23 || minute > 59 || second > 60 || nanos >= 1_000_000_000 {
        return Err(format!("time of day {hour:02}:{minute:02}:{second:02} is out of range"));
    }
    if second == 60 {
        // A leap second: 23:59:60 exists only if TAI - UTC grows by one at the
        // following midnight.
        let before = epoch_from_utc_calendar(year, month, day, hour, minute, 59, 0)?;
        let (ny, nm, nd) = next_day(year, month, day);
        let after = epoch_from_utc_calendar(ny, nm, nd, 0, 0, 0, 0)?;
        if hour != 23 || minute != 59 || (after - before) != 2 * Unit::Second {
            return Err(format!("{year:04}-{month:02}-{day:02}T{hour:02}:{minute:02}:60 is not a leap second"));
        }
        return Ok(before + Unit::Second + (nanos as i64) * Unit::Nanosecond);
    }
    let as_tai = Epoch::maybe_from_gregorian(year, month, day, hour, minute, second, nanos, TimeScale::TAI)
        .map_err(|e| e.to_string())?;
    if as_tai + TAI_MINUS_UTC_BEFORE_1972_S * Unit::Second < utc_start_in_tai() {
        return Ok(as_tai + TAI_MINUS_UTC_BEFORE_1972_S * Unit::Second);
    }
    // Keep the epoch on the TAI scale: hifitime subtracts epochs in the scale
    // of the left operand, and UTC-scale arithmetic would skip leap seconds.
    Epoch::maybe_from_gregorian(year, month, day, hour, minute, second, nanos, TimeScale::UTC)
        .map(|e| e.to_time_scale(TimeScale::TAI))
        .map_err(|e| e.to_string())
}

/// TDB - TT in seconds at `tt_seconds` TT seconds after J2000.0, at the
/// geocentre.
///
/// The seven-term series of USNO Circular 179 (Kaplan 2005, eq. 2.6), a
/// truncation of Fairhead & Bretagnon (1990) good to about 10 us over
/// 1600-2200. Latens uses it instead of hifitime's own TDB, whose shorter
/// series was measured here 47 us from the full series. Measured against the
/// full series (ERFA's eraDtdb): see `tests/reference_time.rs`. The topocentric
/// terms (up to 2 us) are neglected.
pub fn tdb_minus_tt_seconds(tt_seconds: f64) -> f64 {
    let t = tt_seconds / (DAY_S * 36_525.0); // Julian centuries
    0.001_657 * (628.307_6 * t + 6.240_1).sin()
        + 0.000_022 * (575.338_5 * t + 4.297_0).sin()
        + 0.000_014 * (1_256.615_2 * t + 6.196_9).sin()
        + 0.000_005 * (606.977_7 * t + 4.021_2).sin()
        + 0.000_005 * (52.969_1 * t + 0.444_4).sin()
        + 0.000_002 * (21.329_9 * t + 5.543_1).sin()
        + 0.000_010 * t * (628.307_6 * t + 4.249_0).sin()
}

/// TDB days since J2000.0 of an epoch: the time argument of every hot path.
pub fn tdb_days_from_j2000(epoch: Epoch) -> f64 {
    tdb_seconds_from_j2000(epoch) / DAY_S
}

/// TDB seconds since J2000.0 (2000-01-01T12:00:00 TDB) of an epoch.
pub fn tdb_seconds_from_j2000(epoch: Epoch) -> f64 {
    let tt = tt_seconds_from_j2000(epoch);
    tt + tdb_minus_tt_seconds(tt)
}

/// The epoch at `days` TDB days after J2000.0.
pub fn epoch_from_tdb_days(days: f64) -> Epoch {
    let whole = days.floor();
    epoch_from_tdb_j2000(whole as i64, (days - whole) * DAY_S)
}

/// TT seconds since J2000.0 (2000-01-01T12:00:00 TT) of an epoch.
pub fn tt_seconds_from_j2000(epoch: Epoch) -> f64 {
    (epoch - j2000_tt()).to_seconds()
}

/// J2000.0 as an instant on the TT scale, kept as TAI (see
/// [`epoch_from_utc_calendar`] for why every Latens epoch is on TAI).
fn j2000_tt() -> Epoch {
    Epoch::from_gregorian(2000, 1, 1, 12, 0, 0, 0, TimeScale::TT).to_time_scale(TimeScale::TAI)
}

/// The epoch at `whole_days + seconds` after J2000.0 on the TT scale.
pub fn epoch_from_tt_j2000(whole_days: i64, seconds: f64) -> Epoch {
    j2000_tt() + whole_days * Unit::Day + seconds * Unit::Second
}

/// The epoch at `whole_days + seconds` after J2000.0 on the TDB scale.
pub fn epoch_from_tdb_j2000(whole_days: i64, seconds: f64) -> Epoch {
    // TT = TDB - (TDB - TT); the series varies by under 1e-9 s over the 2 ms
    // between evaluating it at TDB and at TT, so one step is exact enough.
    let tdb = whole_days as f64 * DAY_S + seconds;
    let offset = tdb_minus_tt_seconds(tdb - tdb_minus_tt_seconds(tdb));
    epoch_from_tt_j2000(whole_days, seconds - offset)
}

/// The UTC calendar date and time of an epoch, following Latens's pre-1972
/// rule, as `(year, month, day, hour, minute, second, nanos)`.
pub fn utc_calendar_from_epoch(epoch: Epoch) -> (i32, u8, u8, u8, u8, u8, u32) {
    if epoch < utc_start_in_tai() {
        let shifted = epoch - TAI_MINUS_UTC_BEFORE_1972_S * Unit::Second;
        shifted.to_gregorian(TimeScale::TAI)
    } else {
        epoch.to_gregorian_utc()
    }
}

/// ISO 8601 UTC text of an epoch, to the millisecond, with a `Z`.
pub fn utc_iso_from_epoch(epoch: Epoch) -> String {
    // Round to the millisecond first so that 59.9996 s does not print as 60.000.
    // Rounding happens on the TAI scale, which differs from UTC by whole
    // seconds, so the UTC milliseconds are rounded correctly.
    let rounded = epoch.to_time_scale(TimeScale::TAI).round(Duration::from_milliseconds(1.0));
    let (y, mo, d, h, mi, s, ns) = utc_calendar_from_epoch(rounded);
    format!("{y:04}-{mo:02}-{d:02}T{h:02}:{mi:02}:{s:02}.{:03}Z", ns / 1_000_000)
}

pub(crate) fn is_leap_year(year: i32) -> bool {
    (year % 4 == 0 && year % 100 != 0) || year % 400 == 0
}

pub(crate) fn days_in_month(year: i32, month: u8) -> u8 {
    match month {
        1 | 3 | 5 | 7 | 8 | 10 | 12 => 31,
        4 | 6 | 9 | 11 => 30,
        2 if is_leap_year(year) => 29,
        2 => 28,
        _ => 0,
    }
}

fn next_day(year: i32, month: u8, day: u8) -> (i32, u8, u8) {
    if day < days_in_month(year, month) {
        (year, month, day + 1)
    } else if month < 12 {
        (year, month + 1, 1)
    } else {
        (year + 1, 1, 1)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn j2000_is_zero_days_tdb() {
        let e = epoch_from_tdb_j2000(0, 0.0);
        assert!(tdb_days_from_j2000(e).abs() < 1e-11);
        // TDB - TT stays within 1.7 ms, so J2000 TT and J2000 TDB are within
        // 2 ms of each other (common practice).
        let tt = epoch_from_tt_j2000(0, 0.0);
        assert!(tdb_seconds_from_j2000(tt).abs() < 2e-3);
    }

    #[test]
    fn tdb_days_round_trip_to_a_microsecond() {
        for days in [-36_525.0, -0.3, 0.0, 8_765.432_1, 18_262.5] {
            let back = tdb_days_from_j2000(epoch_from_tdb_days(days));
            assert!(((back - days) * DAY_S).abs() < 1e-6, "{days}: {back}");
        }
    }

    #[test]
    fn utc_continuous_across_1972() {
        let a = epoch_from_utc_calendar(1971, 12, 31, 23, 59, 59, 0).unwrap();
        let b = epoch_from_utc_calendar(1972, 1, 1, 0, 0, 0, 0).unwrap();
        assert_eq!(b - a, 1 * Unit::Second);
    }

    #[test]
    fn leap_second_is_accepted_only_where_it_happened() {
        let a = epoch_from_utc_calendar(2016, 12, 31, 23, 59, 59, 0).unwrap();
        let l = epoch_from_utc_calendar(2016, 12, 31, 23, 59, 60, 0).unwrap();
        let b = epoch_from_utc_calendar(2017, 1, 1, 0, 0, 0, 0).unwrap();
        assert_eq!(l - a, 1 * Unit::Second);
        assert_eq!(b - l, 1 * Unit::Second);
        assert!(epoch_from_utc_calendar(2015, 12, 31, 23, 59, 60, 0).is_err());
    }

    #[test]
    fn calendar_round_trips_before_and_after_1972() {
        for (y, mo, d, h, mi, s) in [(1905, 3, 1, 4, 5, 6), (1999, 12, 31, 23, 59, 59)] {
            let e = epoch_from_utc_calendar(y, mo, d, h, mi, s, 250_000_000).unwrap();
            let back = utc_calendar_from_epoch(e);
            assert_eq!(back, (y, mo, d, h, mi, s, 250_000_000));
        }
    }

    #[test]
    fn impossible_dates_are_refused() {
        assert!(epoch_from_utc_calendar(2023, 2, 29, 0, 0, 0, 0).is_err());
        assert!(epoch_from_utc_calendar(2024, 13, 1, 0, 0, 0, 0).is_err());
        assert!(epoch_from_utc_calendar(2024, 4, 31, 0, 0, 0, 0).is_err());
        assert!(epoch_from_utc_calendar(2024, 1, 1, 24, 0, 0, 0).is_err());
        assert!(epoch_from_utc_calendar(2024, 2, 29, 0, 0, 0, 0).is_ok());
    }
}
