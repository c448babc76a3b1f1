//! The calendar of a backtest: when cohorts are formed, and each entity's grade as of a date.

use crate::time::Calendar;
use chrono::{Datelike, NaiveDate};
use std::collections::BTreeMap;

/// How cohort dates are laid out.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum CohortFrequency {
    Annual,
    Quarterly,
}
crate::text_form!(CohortFrequency { Annual => "annual", Quarterly => "quarterly" });

/// First business day of each year (or quarter) from the first to the last curve date.
pub fn cohort_dates(first: NaiveDate, last: NaiveDate, frequency: CohortFrequency, cal: &Calendar) -> Vec<NaiveDate> {
    let step = match frequency {
        CohortFrequency::Annual => 12,
        CohortFrequency::Quarterly => 3,
    };
    let mut out = Vec::new();
    let month0 = match frequency {
        CohortFrequency::Annual => 1,
        CohortFrequency::Quarterly => ((first.month() - 1) / 3) * 3 + 1,
    };
    let mut start = NaiveDate::from_ymd_opt(first.year(), month0, 1).unwrap_or(first);
    while start <= last {
        let t = cal.following(start);
        if t >= first && t <= last {
            out.push(t);
        }
        start = crate::time::add_months(start, step);
    }
    out
}

/// Grade as of a date, from a grades table: the grade of the latest `from_date` on or before
/// it.
#[derive(Debug, Clone, Default)]
pub struct GradeBook {
    by_entity: BTreeMap<String, Vec<(NaiveDate, u32)>>,
}

impl GradeBook {
    /// From (entity, from_date, grade) rows in any order.
    pub fn new(rows: impl IntoIterator<Item = (String, NaiveDate, u32)>) -> GradeBook {
        let mut by_entity: BTreeMap<String, Vec<(NaiveDate, u32)>> = BTreeMap::new();
        for (entity, from_date, grade) in rows {
            by_entity.entry(entity).or_default().push((from_date, grade));
        }
        for v in by_entity.values_mut() {
            v.sort();
        }
        GradeBook { by_entity }
    }

    pub fn grade(&self, entity: &str, date: NaiveDate) -> Option<u32> {
        GradeBook::grade_in(self.history(entity), date)
    }

    /// The entity's (from date, grade) rows in date order; none for an entity without grades.
    pub fn history(&self, entity: &str) -> &[(NaiveDate, u32)] {
        self.by_entity.get(entity).map_or(&[], Vec::as_slice)
    }

    /// [`GradeBook::grade`] on the entity's [`GradeBook::history`].
    pub fn grade_in(history: &[(NaiveDate, u32)], date: NaiveDate) -> Option<u32> {
        let i = history.partition_point(|(d, _)| *d <= date);
        (i > 0).then(|| history[i - 1].1)
    }

    pub fn is_empty(&self) -> bool {
        self.by_entity.is_empty()
    }
}
