//! Day-count conventions: Actual/360 (CDS premium), Actual/365 Fixed (hazard and discount
//! time axis), 30/360 bond basis and Actual/Actual ICMA (bond coupons).

use chrono::{Datelike, NaiveDate};
use std::fmt;
use std::str::FromStr;

/// A day-count convention.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum DayCount {
    /// Actual days / 360.
    Act360,
    /// Actual days / 365, whatever the year.
    Act365Fixed,
    /// 30/360 bond basis (ISDA 2006 section 4.16(f)): D1 = 31 becomes 30; D2 = 31 becomes 30
    /// when D1 is 30 or 31.
    Thirty360,
    /// Actual/Actual ICMA (ICMA Rule 251): days in the period divided by (frequency x days in
    /// the reference coupon period). Needs the reference period, see [`DayCount::year_fraction_in_period`].
    ActActIcma,
}

impl DayCount {
    /// Year fraction between two dates. For [`DayCount::ActActIcma`] the period itself is
    /// taken as the reference period of an annual coupon, which is only right for regular
    /// annual periods; bond code calls [`DayCount::year_fraction_in_period`] instead.
    pub fn year_fraction(self, start: NaiveDate, end: NaiveDate) -> f64 {
        match self {
            DayCount::Act360 => (end - start).num_days() as f64 / 360.0,
            DayCount::Act365Fixed => (end - start).num_days() as f64 / 365.0,
            DayCount::Thirty360 => thirty_360_days(start, end) as f64 / 360.0,
            DayCount::ActActIcma => self.year_fraction_in_period(start, end, start, end, 1),
        }
    }

    /// Year fraction of `[start, end]` inside the regular coupon period
    /// `[ref_start, ref_end]` of a bond paying `frequency` coupons a year. For Actual/Actual
    /// ICMA this is days(start, end) / (frequency x days(ref_start, ref_end)); the other
    /// conventions ignore the reference period.
    pub fn year_fraction_in_period(
        self,
        start: NaiveDate,
        end: NaiveDate,
        ref_start: NaiveDate,
        ref_end: NaiveDate,
        frequency: u32,
    ) -> f64 {
        match self {
            DayCount::ActActIcma => {
                let ref_days = (ref_end - ref_start).num_days();
                if ref_days <= 0 || frequency == 0 {
                    return 0.0;
                }
                (end - start).num_days() as f64 / (frequency as f64 * ref_days as f64)
            }
            other => other.year_fraction(start, end),
        }
    }

    /// The name used in the input tables.
    pub fn name(self) -> &'static str {
        match self {
            DayCount::Act360 => "ACT/360",
            DayCount::Act365Fixed => "ACT/365F",
            DayCount::Thirty360 => "30/360",
            DayCount::ActActIcma => "ACT/ACT-ICMA",
        }
    }
}

/// 30/360 bond-basis day count between two dates.
fn thirty_360_days(start: NaiveDate, end: NaiveDate) -> i64 {
    let (y1, m1, mut d1) = (start.year() as i64, start.month() as i64, start.day() as i64);
    let (y2, m2, mut d2) = (end.year() as i64, end.month() as i64, end.day() as i64);
    if d1 == 31 {
        d1 = 30;
    }
    if d2 == 31 && d1 >= 30 {
        d2 = 30;
    }
    360 * (y2 - y1) + 30 * (m2 - m1) + (d2 - d1)
}

/// A day-count name that is not understood.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("day count {text:?} is not understood: expected one of ACT/360, ACT/365F, 30/360, ACT/ACT-ICMA")]
pub struct DayCountError {
    pub text: String,
}

impl FromStr for DayCount {
    type Err = DayCountError;

    fn from_str(s: &str) -> Result<DayCount, DayCountError> {
        let norm: String = s.trim().to_ascii_uppercase().chars().filter(|c| !matches!(c, ' ' | '_')).collect();
        match norm.as_str() {
            "ACT/360" | "ACTUAL/360" | "A360" => Ok(DayCount::Act360),
            "ACT/365F" | "ACT/365FIXED" | "ACTUAL/365FIXED" | "ACT/365" | "A365F" => Ok(DayCount::Act365Fixed),
            "30/360" | "30/360BOND" | "30/360BONDBASIS" | "30I/360" => Ok(DayCount::Thirty360),
            "ACT/ACT-ICMA" | "ACT/ACTICMA" | "ACTUAL/ACTUALICMA" | "ACT/ACT" => Ok(DayCount::ActActIcma),
            _ => Err(DayCountError { text: s.to_string() }),
        }
    }
}

impl fmt::Display for DayCount {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn d(y: i32, m: u32, day: u32) -> NaiveDate {
        NaiveDate::from_ymd_opt(y, m, day).unwrap()
    }

    #[test]
    fn actual_counts() {
        // Definitions (ISDA 2006 Definitions section 4.16).
        assert_eq!(DayCount::Act360.year_fraction(d(2024, 3, 20), d(2024, 6, 20)), 92.0 / 360.0);
        assert_eq!(DayCount::Act365Fixed.year_fraction(d(2024, 1, 1), d(2025, 1, 1)), 366.0 / 365.0);
    }

    #[test]
    fn thirty_360_bond_basis() {
        // ISDA 2006 section 4.16(f) worked by hand.
        let cases = [
            (d(2024, 1, 31), d(2024, 2, 29), 29),
            (d(2024, 1, 30), d(2024, 3, 31), 60),
            (d(2024, 1, 15), d(2024, 3, 31), 76),
            (d(2024, 2, 29), d(2024, 8, 31), 182),
            (d(2023, 12, 31), d(2024, 12, 31), 360),
        ];
        for (a, b, days) in cases {
            assert_eq!(thirty_360_days(a, b), days, "{a} {b}");
        }
    }

    #[test]
    fn act_act_icma_regular_period_is_one_over_frequency() {
        // ICMA Rule 251: a full regular period accrues exactly 1/frequency.
        let dc = DayCount::ActActIcma;
        let f = dc.year_fraction_in_period(d(2024, 2, 15), d(2024, 8, 15), d(2024, 2, 15), d(2024, 8, 15), 2);
        assert_eq!(f, 0.5);
        let half = dc.year_fraction_in_period(d(2024, 2, 15), d(2024, 5, 15), d(2024, 2, 15), d(2024, 8, 15), 2);
        assert!((half - 90.0 / (2.0 * 182.0)).abs() < 1e-15);
    }

    #[test]
    fn names_round_trip() {
        for dc in [DayCount::Act360, DayCount::Act365Fixed, DayCount::Thirty360, DayCount::ActActIcma] {
            assert_eq!(dc.name().parse::<DayCount>().unwrap(), dc);
        }
        assert!("ACT/999".parse::<DayCount>().is_err());
    }
}
