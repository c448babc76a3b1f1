//! Business-day calendars: weekends, plus an optional list of holidays, and the usual
//! adjustment rules.

use chrono::{Datelike, NaiveDate, Weekday};

/// How a date that falls on a non-business day is moved.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum BusinessDayConvention {
    Unadjusted,
    /// The next business day.
    Following,
    /// The next business day unless it is in the next month, then the previous one.
    ModifiedFollowing,
    /// The previous business day.
    Preceding,
}

/// A weekends-only calendar with an optional sorted holiday list.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Calendar {
    holidays: Vec<NaiveDate>,
}

impl Calendar {
    /// Saturdays and Sundays only.
    pub fn weekends_only() -> Calendar {
        Calendar { holidays: Vec::new() }
    }

    /// Weekends plus the given holidays (order and duplicates do not matter).
    pub fn with_holidays(mut holidays: Vec<NaiveDate>) -> Calendar {
        holidays.sort_unstable();
        holidays.dedup();
        Calendar { holidays }
    }

    pub fn holidays(&self) -> &[NaiveDate] {
        &self.holidays
    }

    pub fn is_weekend(date: NaiveDate) -> bool {
        matches!(date.weekday(), Weekday::Sat | Weekday::Sun)
    }

    pub fn is_holiday(&self, date: NaiveDate) -> bool {
        !self.holidays.is_empty() && self.holidays.binary_search(&date).is_ok()
    }

    pub fn is_business_day(&self, date: NaiveDate) -> bool {
        !Self::is_weekend(date) && !self.is_holiday(date)
    }

    /// Moves `date` to a business day by `convention`.
    pub fn adjust(&self, date: NaiveDate, convention: BusinessDayConvention) -> NaiveDate {
        match convention {
            BusinessDayConvention::Unadjusted => date,
            BusinessDayConvention::Following => self.next_business_day(date),
            BusinessDayConvention::Preceding => self.previous_business_day(date),
            BusinessDayConvention::ModifiedFollowing => {
                let f = self.next_business_day(date);
                if f.month() != date.month() {
                    self.previous_business_day(date)
                } else {
                    f
                }
            }
        }
    }

    /// Following adjustment, the convention of the CDS premium dates.
    pub fn following(&self, date: NaiveDate) -> NaiveDate {
        self.next_business_day(date)
    }

    fn next_business_day(&self, mut date: NaiveDate) -> NaiveDate {
        while !self.is_business_day(date) {
            date = date.succ_opt().expect("date within chrono's range");
        }
        date
    }

    fn previous_business_day(&self, mut date: NaiveDate) -> NaiveDate {
        while !self.is_business_day(date) {
            date = date.pred_opt().expect("date within chrono's range");
        }
        date
    }

    /// Moves `n` business days forward (n > 0) or backward (n < 0) from `date`; `n = 0`
    /// returns the Following-adjusted date.
    pub fn add_business_days(&self, mut date: NaiveDate, n: i32) -> NaiveDate {
        if n == 0 {
            return self.next_business_day(date);
        }
        let step = n.signum();
        let mut left = n.abs();
        while left > 0 {
            date = if step > 0 {
                date.succ_opt().expect("date within chrono's range")
            } else {
                date.pred_opt().expect("date within chrono's range")
            };
            if self.is_business_day(date) {
                left -= 1;
            }
        }
        date
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use BusinessDayConvention::*;

    fn d(y: i32, m: u32, day: u32) -> NaiveDate {
        NaiveDate::from_ymd_opt(y, m, day).unwrap()
    }

    #[test]
    fn weekend_adjustments() {
        let cal = Calendar::weekends_only();
        // 2024-03-30 is a Saturday.
        assert_eq!(cal.adjust(d(2024, 3, 30), Following), d(2024, 4, 1));
        assert_eq!(cal.adjust(d(2024, 3, 30), ModifiedFollowing), d(2024, 3, 29));
        assert_eq!(cal.adjust(d(2024, 3, 30), Preceding), d(2024, 3, 29));
        assert_eq!(cal.adjust(d(2024, 3, 30), Unadjusted), d(2024, 3, 30));
        assert_eq!(cal.adjust(d(2024, 3, 27), Following), d(2024, 3, 27));
    }

    #[test]
    fn holidays_are_skipped() {
        let cal = Calendar::with_holidays(vec![d(2024, 4, 1), d(2024, 4, 1)]);
        assert_eq!(cal.holidays().len(), 1);
        assert_eq!(cal.adjust(d(2024, 3, 30), Following), d(2024, 4, 2));
        assert!(!cal.is_business_day(d(2024, 4, 1)));
    }

    #[test]
    fn business_day_steps() {
        let cal = Calendar::weekends_only();
        // Thursday 2024-03-21 + 3 business days = Tuesday 2024-03-26.
        assert_eq!(cal.add_business_days(d(2024, 3, 21), 3), d(2024, 3, 26));
        assert_eq!(cal.add_business_days(d(2024, 3, 26), -3), d(2024, 3, 21));
        assert_eq!(cal.add_business_days(d(2024, 3, 23), 0), d(2024, 3, 25));
    }
}
