//! Dates and the calendar arithmetic of the credit markets: tenors, day counts, business-day
//! calendars, IMM dates and the standard CDS premium schedule.
//!
//! Everything here is pure: no I/O, no clock, no global calendar. A calendar is a value passed
//! in; an as-of date is an argument.

pub mod calendar;
pub mod daycount;
pub mod imm;
pub mod schedule;
pub mod tenor;

pub use calendar::{BusinessDayConvention, Calendar};
pub use daycount::DayCount;
pub use tenor::Tenor;

use chrono::{Datelike, NaiveDate};

/// Adds calendar months, clipping the day to the last day of the target month
/// (31 Jan + 1M = 28/29 Feb). This is the unadjusted month arithmetic used for discount-curve
/// pillars and IMM schedules.
pub fn add_months(date: NaiveDate, months: i32) -> NaiveDate {
    let total = date.year() * 12 + date.month0() as i32 + months;
    let year = total.div_euclid(12);
    let month0 = total.rem_euclid(12) as u32;
    let last = days_in_month(year, month0 + 1);
    let day = date.day().min(last);
    NaiveDate::from_ymd_opt(year, month0 + 1, day).expect("clipped day is always valid")
}

/// Number of days in a month (1-based month).
pub fn days_in_month(year: i32, month: u32) -> u32 {
    match month {
        1 | 3 | 5 | 7 | 8 | 10 | 12 => 31,
        4 | 6 | 9 | 11 => 30,
        _ => {
            if is_leap_year(year) {
                29
            } else {
                28
            }
        }
    }
}

/// Gregorian leap-year rule.
pub fn is_leap_year(year: i32) -> bool {
    (year % 4 == 0 && year % 100 != 0) || year % 400 == 0
}

/// Adds (or subtracts) calendar days.
pub fn add_days(date: NaiveDate, days: i64) -> NaiveDate {
    date + chrono::Duration::days(days)
}

/// Calendar days from `from` to `to` (negative when `to` is earlier).
pub fn days_between(from: NaiveDate, to: NaiveDate) -> i64 {
    (to - from).num_days()
}

/// Serial day number (days since 0001-01-01 counted from 1), the integer form used inside
/// the pricing grids.
pub fn serial(date: NaiveDate) -> i32 {
    date.num_days_from_ce()
}

/// Parses a strict ISO `yyyy-mm-dd` date. Faster than a format-string parser and stricter:
/// exactly ten characters, dashes in place, a real calendar date.
pub fn parse_iso_date(text: &str) -> Option<NaiveDate> {
    let b = text.trim().as_bytes();
    if b.len() != 10 || b[4] != b'-' || b[7] != b'-' {
        return None;
    }
    let digits = |s: &[u8]| -> Option<u32> {
        let mut v = 0u32;
        for &c in s {
            if !c.is_ascii_digit() {
                return None;
            }
            v = v * 10 + (c - b'0') as u32;
        }
        Some(v)
    };
    let y = digits(&b[0..4])? as i32;
    let m = digits(&b[5..7])?;
    let d = digits(&b[8..10])?;
    NaiveDate::from_ymd_opt(y, m, d)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn d(y: i32, m: u32, day: u32) -> NaiveDate {
        NaiveDate::from_ymd_opt(y, m, day).unwrap()
    }

    #[test]
    fn month_addition_clips_to_month_end() {
        // Common practice (unadjusted month arithmetic with end-of-month clipping).
        assert_eq!(add_months(d(2024, 1, 31), 1), d(2024, 2, 29));
        assert_eq!(add_months(d(2023, 1, 31), 1), d(2023, 2, 28));
        assert_eq!(add_months(d(2024, 2, 29), 12), d(2025, 2, 28));
        assert_eq!(add_months(d(2024, 3, 20), -3), d(2023, 12, 20));
        assert_eq!(add_months(d(2024, 11, 30), 3), d(2025, 2, 28));
    }

    #[test]
    fn iso_dates_parse_strictly() {
        assert_eq!(parse_iso_date("2024-02-29"), Some(d(2024, 2, 29)));
        assert_eq!(parse_iso_date("2023-02-29"), None);
        assert_eq!(parse_iso_date("2024-2-29"), None);
        assert_eq!(parse_iso_date("2024/02/29"), None);
        assert_eq!(parse_iso_date(""), None);
    }
}
