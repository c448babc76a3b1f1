//! Review periods: the calendar windows a stability review summarises (month, quarter,
//! half-year, year), with the labels the tables and the report use.

use chrono::{Datelike, NaiveDate};
use std::str::FromStr;

/// The length of a review period. The pipeline file selects one; the calendar quarter is the
/// default because quarterly model reviews are common practice (no single source).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Default, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ReviewPeriod {
    /// Calendar month, labelled `2024-03`.
    Month,
    /// Calendar quarter, labelled `2024Q1`.
    #[default]
    Quarter,
    /// Calendar half-year, labelled `2024H1`.
    HalfYear,
    /// Calendar year, labelled `2024`.
    Year,
}

impl ReviewPeriod {
    /// Number of calendar months in one period.
    pub fn months(self) -> u32 {
        match self {
            ReviewPeriod::Month => 1,
            ReviewPeriod::Quarter => 3,
            ReviewPeriod::HalfYear => 6,
            ReviewPeriod::Year => 12,
        }
    }

    /// The period that contains `date`.
    pub fn of(self, date: NaiveDate) -> Period {
        Period { year: date.year(), index: date.month0() / self.months(), kind: self }
    }

    /// The name used in pipeline files and method notes (`month`, `quarter`, `half_year`, `year`).
    pub fn as_str(self) -> &'static str {
        match self {
            ReviewPeriod::Month => "month",
            ReviewPeriod::Quarter => "quarter",
            ReviewPeriod::HalfYear => "half_year",
            ReviewPeriod::Year => "year",
        }
    }
}

impl FromStr for ReviewPeriod {
    type Err = String;

    /// Parses the names of [`ReviewPeriod::as_str`].
    fn from_str(text: &str) -> Result<Self, Self::Err> {
        match text {
            "month" => Ok(ReviewPeriod::Month),
            "quarter" => Ok(ReviewPeriod::Quarter),
            "half_year" => Ok(ReviewPeriod::HalfYear),
            "year" => Ok(ReviewPeriod::Year),
            other => Err(format!("unknown review period `{other}`; expected month, quarter, half_year or year")),
        }
    }
}

/// One review period: a year and the 0-based index of the period within it. Periods of the
/// same kind order by time.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct Period {
    year: i32,
    index: u32,
    kind: ReviewPeriod,
}

impl Period {
    /// The calendar year of the period.
    pub fn year(&self) -> i32 {
        self.year
    }

    /// The kind of period.
    pub fn kind(&self) -> ReviewPeriod {
        self.kind
    }

    /// The label used in every table: `2024-03`, `2024Q1`, `2024H1` or `2024`.
    pub fn label(&self) -> String {
        match self.kind {
            ReviewPeriod::Month => format!("{}-{:02}", self.year, self.index + 1),
            ReviewPeriod::Quarter => format!("{}Q{}", self.year, self.index + 1),
            ReviewPeriod::HalfYear => format!("{}H{}", self.year, self.index + 1),
            ReviewPeriod::Year => format!("{}", self.year),
        }
    }

    /// The period just before this one (the comparison base of period-on-period changes and PSI).
    pub fn previous(&self) -> Period {
        if self.index == 0 {
            let last = 12 / self.kind.months() - 1;
            Period { year: self.year - 1, index: last, kind: self.kind }
        } else {
            Period { index: self.index - 1, ..*self }
        }
    }

    /// First calendar day of the period; `None` only outside chrono's date range.
    pub fn start(&self) -> Option<NaiveDate> {
        NaiveDate::from_ymd_opt(self.year, self.index * self.kind.months() + 1, 1)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn d(y: i32, m: u32, day: u32) -> NaiveDate {
        NaiveDate::from_ymd_opt(y, m, day).unwrap()
    }

    #[test]
    fn labels_of_each_kind() {
        let date = d(2024, 8, 15);
        assert_eq!(ReviewPeriod::Month.of(date).label(), "2024-08");
        assert_eq!(ReviewPeriod::Quarter.of(date).label(), "2024Q3");
        assert_eq!(ReviewPeriod::HalfYear.of(date).label(), "2024H2");
        assert_eq!(ReviewPeriod::Year.of(date).label(), "2024");
    }

    #[test]
    fn previous_crosses_the_year() {
        assert_eq!(ReviewPeriod::Quarter.of(d(2024, 2, 1)).previous().label(), "2023Q4");
        assert_eq!(ReviewPeriod::Month.of(d(2024, 1, 31)).previous().label(), "2023-12");
        assert_eq!(ReviewPeriod::HalfYear.of(d(2024, 1, 31)).previous().label(), "2023H2");
        assert_eq!(ReviewPeriod::Year.of(d(2024, 1, 31)).previous().label(), "2023");
        assert_eq!(ReviewPeriod::Quarter.of(d(2024, 8, 1)).previous(), ReviewPeriod::Quarter.of(d(2024, 4, 1)));
    }

    #[test]
    fn start_and_order() {
        let q = ReviewPeriod::Quarter.of(d(2024, 11, 30));
        assert_eq!(q.start(), Some(d(2024, 10, 1)));
        assert!(q.previous() < q);
        assert_eq!("half_year".parse::<ReviewPeriod>(), Ok(ReviewPeriod::HalfYear));
        assert!("fortnight".parse::<ReviewPeriod>().is_err());
    }
}
