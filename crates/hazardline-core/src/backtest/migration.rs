//! One-year grade migration by the cohort method: at each cohort date t, every entity with a
//! grade in force at t, not in default and in coverage, is counted once in its grade at t; a
//! year later (t + 12 months) it is in `default` when it defaulted in (t, t + 1Y] inside its
//! coverage, in `left coverage` when its coverage ended before t + 1Y without such a default,
//! and otherwise in the grade in force at t + 1Y. A cohort whose year ends after the outcome
//! end is left out (its year is not observed). Rows of `backtest_migration`, per cohort year
//! and pooled (`all`), one per non-empty cell.

use super::{BacktestError, EntityFacts};
use chrono::{Datelike, Months, NaiveDate};
use std::collections::BTreeMap;

/// Where a member of a migration cohort is a year later.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum Destination {
    Grade(u32),
    Default,
    LeftCoverage,
}

impl Destination {
    /// The label in the `to` column: "grade 3", "default", "left coverage".
    pub fn label(&self) -> String {
        match self {
            Destination::Grade(g) => format!("grade {g}"),
            Destination::Default => "default".into(),
            Destination::LeftCoverage => "left coverage".into(),
        }
    }
}

/// One cell of a migration matrix.
#[derive(Debug, Clone, PartialEq)]
pub struct MigrationRow {
    /// A year like "2016", or "all".
    pub cohort: String,
    pub from_grade: u32,
    pub to: String,
    pub count: u64,
    /// Entities in `from_grade` at the cohort dates of the row.
    pub from_total: u64,
    /// count / from_total.
    pub share: f64,
}

fn grade_at(f: &EntityFacts, t: NaiveDate) -> Option<u32> {
    f.grades.iter().filter(|g| g.from_date <= t).max_by_key(|g| g.from_date).map(|g| g.grade)
}

/// The grade at t and the destination a year later of one entity, None when it is not in a
/// migration cohort at t.
pub fn migration_of(f: &EntityFacts, t: NaiveDate, year_end: NaiveDate) -> Option<(u32, Destination)> {
    let from = grade_at(f, t)?;
    if f.default_date.is_some_and(|d| d <= t) || f.coverage_end.is_some_and(|c| c < t) {
        return None;
    }
    let covered_to = f.coverage_end.map_or(year_end, |c| c.min(year_end));
    let to = if f.default_date.is_some_and(|d| d > t && d <= covered_to) {
        Destination::Default
    } else if f.coverage_end.is_some_and(|c| c < year_end) {
        Destination::LeftCoverage
    } else {
        Destination::Grade(grade_at(f, year_end).unwrap_or(from))
    };
    Some((from, to))
}

/// The migration rows of every cohort date whose year ends on or before `outcome_end`.
pub fn migration_rows(
    facts: &[EntityFacts],
    cohort_dates: &[NaiveDate],
    outcome_end: NaiveDate,
) -> Result<Vec<MigrationRow>, BacktestError> {
    let mut cells: BTreeMap<(String, u32, Destination), u64> = BTreeMap::new();
    for &t in cohort_dates {
        let year_end =
            t.checked_add_months(Months::new(12)).ok_or(BacktestError::DateOverflow { date: t, years: 1 })?;
        if year_end > outcome_end {
            continue;
        }
        for f in facts {
            if let Some((from, to)) = migration_of(f, t, year_end) {
                for cohort in [t.year().to_string(), "all".to_string()] {
                    *cells.entry((cohort, from, to)).or_default() += 1;
                }
            }
        }
    }
    let mut totals: BTreeMap<(String, u32), u64> = BTreeMap::new();
    for ((c, from, _), n) in &cells {
        *totals.entry((c.clone(), *from)).or_default() += n;
    }
    // "all" after the years, as in the other backtest tables.
    let mut rows: Vec<MigrationRow> = cells
        .into_iter()
        .map(|((cohort, from_grade, to), count)| {
            let from_total = totals[&(cohort.clone(), from_grade)];
            MigrationRow {
                cohort,
                from_grade,
                to: to.label(),
                count,
                from_total,
                share: count as f64 / from_total as f64,
            }
        })
        .collect();
    rows.sort_by(|a, b| {
        let key = |r: &MigrationRow| (r.cohort == "all", r.cohort.clone(), r.from_grade);
        key(a).cmp(&key(b))
    });
    Ok(rows)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::backtest::GradeSpell;

    fn d(s: &str) -> NaiveDate {
        NaiveDate::parse_from_str(s, "%Y-%m-%d").unwrap()
    }

    fn entity(spells: &[(&str, u32)], default: Option<&str>, end: Option<&str>) -> EntityFacts {
        EntityFacts {
            entity: format!("{spells:?}{default:?}{end:?}"),
            grades: spells.iter().map(|(f, g)| GradeSpell { from_date: d(f), grade: *g }).collect(),
            default_date: default.map(d),
            coverage_end: end.map(d),
        }
    }

    /// Hand-counted: one stays in 2, one moves 2 -> 3, one defaults from 3, one leaves
    /// coverage from 3 (a default after it leaves is not seen), one is ungraded at t.
    #[test]
    fn hand_counted_matrix() {
        let f = vec![
            entity(&[("2019-01-01", 2)], None, None),
            entity(&[("2019-01-01", 2), ("2020-06-01", 3)], None, None),
            entity(&[("2019-01-01", 3)], Some("2020-09-01"), None),
            entity(&[("2019-01-01", 3)], Some("2020-12-01"), Some("2020-10-01")),
            entity(&[("2020-03-01", 1)], None, None),
        ];
        let rows = migration_rows(&f, &[d("2020-01-02"), d("2021-01-04")], d("2021-06-30")).unwrap();
        let cell = |from: u32, to: &str| rows.iter().find(|r| r.cohort == "2020" && r.from_grade == from && r.to == to);
        assert_eq!(cell(2, "grade 2").map(|r| r.count), Some(1));
        assert_eq!(cell(2, "grade 3").map(|r| (r.count, r.from_total, r.share)), Some((1, 2, 0.5)));
        assert_eq!(cell(3, "default").map(|r| r.count), Some(1));
        assert_eq!(cell(3, "left coverage").map(|r| r.count), Some(1));
        assert!(rows.iter().all(|r| r.from_grade != 1), "ungraded at t");
        assert!(rows.iter().all(|r| r.cohort != "2021"), "2021's year ends after the outcome end");
        assert_eq!(rows.iter().filter(|r| r.cohort == "all").map(|r| r.count).sum::<u64>(), 4);
    }
}
