//! The smaller input tables: entities, grades, defaults, cohort_history, bonds (static data)
//! and bond_quotes. Each reader applies its row rules and returns records plus rejects; the
//! cross-table rules (unknown entity, unknown bond, after default, duplicates) run in `load`.

use super::cds::{number, required_date, required_text};
use super::source::{read_table_batches, Cell, ColumnSpec, Kind, RawFile, Reject, TableInfo};
use crate::error::Result;
use crate::time::{Calendar, DayCount};
use chrono::NaiveDate;
use std::path::Path;

/// Rows of one table that passed the row rules, with their provenance.
#[derive(Debug, Clone)]
pub struct Rows<T> {
    pub rows: Vec<(T, Provenance)>,
    pub rejects: Vec<Reject>,
    pub info: TableInfo,
}

impl<T> Default for Rows<T> {
    fn default() -> Self {
        Rows { rows: Vec::new(), rejects: Vec::new(), info: TableInfo::default() }
    }
}

/// Where a record came from.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Provenance {
    pub source: String,
    pub row: u64,
}

fn read_rows<T>(
    table: &'static str,
    path: &Path,
    specs: &[ColumnSpec],
    key_of: impl Fn(&RawFile, usize) -> (Option<NaiveDate>, Option<String>, String),
    parse: impl Fn(&RawFile, usize, &str, u64) -> std::result::Result<T, Reject>,
) -> Result<Rows<T>> {
    let mut out = Rows::default();
    let info = read_table_batches(table, path, specs, |file| {
        let src = file.source();
        for i in 0..file.height {
            let row = file.file_row(i);
            match parse(file, i, &src, row) {
                Ok(v) => out.rows.push((v, Provenance { source: src.clone(), row })),
                Err(mut rej) => {
                    let (d, e, k) = key_of(file, i);
                    rej.date = d;
                    rej.entity = e;
                    rej.key = k;
                    out.rejects.push(rej);
                }
            }
        }
    })?;
    out.info = info;
    Ok(out)
}

fn text(c: Cell<'_>) -> Option<String> {
    c.text()
}

// ---------------------------------------------------------------- entities

pub const ENTITIES: &str = "entities";

#[derive(Debug, Clone, PartialEq, Eq)]
pub struct EntityRow {
    pub entity: String,
    pub name: Option<String>,
    pub sector: Option<String>,
    pub region: Option<String>,
    /// The date the entity left the institution's coverage: the defaults table does not
    /// observe it after that date (the backtest censors its members there). Empty: covered
    /// to the end of the study.
    pub coverage_end: Option<NaiveDate>,
}

pub fn read_entities(path: &Path) -> Result<Rows<EntityRow>> {
    const SPECS: &[ColumnSpec] = &[
        ColumnSpec { name: "entity", kind: Kind::Text, required: true },
        ColumnSpec { name: "name", kind: Kind::Text, required: false },
        ColumnSpec { name: "sector", kind: Kind::Text, required: false },
        ColumnSpec { name: "region", kind: Kind::Text, required: false },
        ColumnSpec { name: "coverage_end", kind: Kind::Date, required: false },
    ];
    read_rows(
        ENTITIES,
        path,
        SPECS,
        |f, i| (None, text(f.cell(0, i)), String::new()),
        |f, i, src, row| {
            let entity = required_text(f.cell(0, i), ENTITIES, "entity", src, row)?.text().unwrap_or_default();
            let coverage_end = match f.cell(4, i) {
                Cell::Null => None,
                c => Some(required_date(c, ENTITIES, "coverage_end", src, row)?),
            };
            Ok(EntityRow {
                entity,
                name: text(f.cell(1, i)),
                sector: text(f.cell(2, i)),
                region: text(f.cell(3, i)),
                coverage_end,
            })
        },
    )
}

// ---------------------------------------------------------------- grades

pub const GRADES: &str = "grades";

#[derive(Debug, Clone, PartialEq, Eq)]
pub struct GradeRow {
    pub entity: String,
    pub from_date: NaiveDate,
    /// The institution's own grade, 1 = best.
    pub grade: u32,
}

/// Largest grade accepted: internal scales have tens of grades, not thousands.
pub const MAX_GRADE: f64 = 100.0;

fn whole_number(
    c: Cell<'_>,
    table: &'static str,
    column: &str,
    src: &str,
    row: u64,
    min: f64,
    max: f64,
) -> std::result::Result<Option<u64>, Reject> {
    let v = number(c, table, column, src, row)?;
    match v {
        None => Ok(None),
        Some(x) if x.fract() != 0.0 || x < min || x > max => Err(Reject::new(
            table,
            src,
            row,
            "not_a_whole_number",
            format!("column {column}: {x} is not a whole number in [{min}, {max}]"),
        )),
        Some(x) => Ok(Some(x as u64)),
    }
}

pub fn read_grades(path: &Path) -> Result<Rows<GradeRow>> {
    const SPECS: &[ColumnSpec] = &[
        ColumnSpec { name: "entity", kind: Kind::Text, required: true },
        ColumnSpec { name: "from_date", kind: Kind::Date, required: true },
        ColumnSpec { name: "grade", kind: Kind::Number, required: true },
    ];
    read_rows(
        GRADES,
        path,
        SPECS,
        |f, i| (f.cell(1, i).date().ok().flatten(), text(f.cell(0, i)), text(f.cell(2, i)).unwrap_or_default()),
        |f, i, src, row| {
            let entity = required_text(f.cell(0, i), GRADES, "entity", src, row)?.text().unwrap_or_default();
            let from_date = required_date(f.cell(1, i), GRADES, "from_date", src, row)?;
            let grade = whole_number(f.cell(2, i), GRADES, "grade", src, row, 1.0, MAX_GRADE)?
                .ok_or_else(|| Reject::new(GRADES, src, row, "missing_value", "column grade is empty".into()))?;
            Ok(GradeRow { entity, from_date, grade: grade as u32 })
        },
    )
}

// ---------------------------------------------------------------- defaults

pub const DEFAULTS: &str = "defaults";

#[derive(Debug, Clone, PartialEq, Eq)]
pub struct DefaultRow {
    pub entity: String,
    pub default_date: NaiveDate,
    pub event: Option<String>,
}

pub fn read_defaults(path: &Path) -> Result<Rows<DefaultRow>> {
    const SPECS: &[ColumnSpec] = &[
        ColumnSpec { name: "entity", kind: Kind::Text, required: true },
        ColumnSpec { name: "default_date", kind: Kind::Date, required: true },
        ColumnSpec { name: "event", kind: Kind::Text, required: false },
    ];
    read_rows(
        DEFAULTS,
        path,
        SPECS,
        |f, i| (f.cell(1, i).date().ok().flatten(), text(f.cell(0, i)), String::new()),
        |f, i, src, row| {
            let entity = required_text(f.cell(0, i), DEFAULTS, "entity", src, row)?.text().unwrap_or_default();
            let default_date = required_date(f.cell(1, i), DEFAULTS, "default_date", src, row)?;
            Ok(DefaultRow { entity, default_date, event: text(f.cell(2, i)) })
        },
    )
}

// ---------------------------------------------------------------- cohort_history

pub const COHORT_HISTORY: &str = "cohort_history";

#[derive(Debug, Clone, PartialEq, Eq)]
pub struct CohortHistoryRow {
    pub year: i32,
    pub grade: u32,
    pub obligors: u64,
    pub defaults: u64,
    pub withdrawn: Option<u64>,
}

pub fn read_cohort_history(path: &Path) -> Result<Rows<CohortHistoryRow>> {
    const SPECS: &[ColumnSpec] = &[
        ColumnSpec { name: "year", kind: Kind::Number, required: true },
        ColumnSpec { name: "grade", kind: Kind::Number, required: true },
        ColumnSpec { name: "obligors", kind: Kind::Number, required: true },
        ColumnSpec { name: "defaults", kind: Kind::Number, required: true },
        ColumnSpec { name: "withdrawn", kind: Kind::Number, required: false },
    ];
    read_rows(
        COHORT_HISTORY,
        path,
        SPECS,
        |f, i| {
            (
                None,
                None,
                format!("{} grade {}", text(f.cell(0, i)).unwrap_or_default(), text(f.cell(1, i)).unwrap_or_default()),
            )
        },
        |f, i, src, row| {
            let need = |v: Option<u64>, c: &str| {
                v.ok_or_else(|| Reject::new(COHORT_HISTORY, src, row, "missing_value", format!("column {c} is empty")))
            };
            let year =
                need(whole_number(f.cell(0, i), COHORT_HISTORY, "year", src, row, 1900.0, 2200.0)?, "year")? as i32;
            let grade =
                need(whole_number(f.cell(1, i), COHORT_HISTORY, "grade", src, row, 1.0, MAX_GRADE)?, "grade")? as u32;
            let obligors =
                need(whole_number(f.cell(2, i), COHORT_HISTORY, "obligors", src, row, 0.0, 1e12)?, "obligors")?;
            let defaults =
                need(whole_number(f.cell(3, i), COHORT_HISTORY, "defaults", src, row, 0.0, 1e12)?, "defaults")?;
            let withdrawn = whole_number(f.cell(4, i), COHORT_HISTORY, "withdrawn", src, row, 0.0, 1e12)?;
            if defaults > obligors {
                return Err(Reject::new(
                    COHORT_HISTORY,
                    src,
                    row,
                    "defaults_exceed_obligors",
                    format!("{defaults} defaults out of {obligors} obligors"),
                ));
            }
            if withdrawn.unwrap_or(0) + defaults > obligors {
                return Err(Reject::new(
                    COHORT_HISTORY,
                    src,
                    row,
                    "defaults_exceed_obligors",
                    format!("{defaults} defaults and {} withdrawn out of {obligors} obligors", withdrawn.unwrap_or(0)),
                ));
            }
            Ok(CohortHistoryRow { year, grade, obligors, defaults, withdrawn })
        },
    )
}

// ---------------------------------------------------------------- bonds

pub const BONDS: &str = "bonds";

/// Static data of a fixed-coupon bond. `coupon` is a decimal annual rate (0.045 = 4.5%).
#[derive(Debug, Clone, PartialEq)]
pub struct BondRow {
    pub bond: String,
    pub entity: String,
    pub currency: String,
    pub coupon: f64,
    pub frequency: u32,
    pub maturity: NaiveDate,
    pub day_count: DayCount,
    pub issue_date: Option<NaiveDate>,
    pub seniority: Option<String>,
}

/// A coupon above this (decimal) is taken for a percent typed as a decimal.
pub const MAX_COUPON: f64 = 0.5;

pub fn read_bonds(path: &Path) -> Result<Rows<BondRow>> {
    const SPECS: &[ColumnSpec] = &[
        ColumnSpec { name: "bond", kind: Kind::Text, required: true },
        ColumnSpec { name: "entity", kind: Kind::Text, required: true },
        ColumnSpec { name: "currency", kind: Kind::Text, required: true },
        ColumnSpec { name: "coupon", kind: Kind::Number, required: true },
        ColumnSpec { name: "frequency", kind: Kind::Number, required: true },
        ColumnSpec { name: "maturity", kind: Kind::Date, required: true },
        ColumnSpec { name: "day_count", kind: Kind::Text, required: true },
        ColumnSpec { name: "issue_date", kind: Kind::Date, required: false },
        ColumnSpec { name: "seniority", kind: Kind::Text, required: false },
    ];
    read_rows(
        BONDS,
        path,
        SPECS,
        |f, i| (None, text(f.cell(1, i)), text(f.cell(0, i)).unwrap_or_default()),
        |f, i, src, row| {
            let bond = required_text(f.cell(0, i), BONDS, "bond", src, row)?.text().unwrap_or_default();
            let entity = required_text(f.cell(1, i), BONDS, "entity", src, row)?.text().unwrap_or_default();
            let currency = required_text(f.cell(2, i), BONDS, "currency", src, row)?.text().unwrap_or_default();
            let coupon = number(f.cell(3, i), BONDS, "coupon", src, row)?
                .ok_or_else(|| Reject::new(BONDS, src, row, "missing_value", "column coupon is empty".into()))?;
            if !(0.0..=MAX_COUPON).contains(&coupon) {
                return Err(Reject::new(BONDS, src, row, "implausible_coupon", format!("column coupon: {coupon} is not a decimal rate in [0, {MAX_COUPON}] (percent typed for a decimal?)")));
            }
            let frequency = whole_number(f.cell(4, i), BONDS, "frequency", src, row, 1.0, 12.0)?
                .ok_or_else(|| Reject::new(BONDS, src, row, "missing_value", "column frequency is empty".into()))?
                as u32;
            if ![1, 2, 4, 12].contains(&frequency) {
                return Err(Reject::new(
                    BONDS,
                    src,
                    row,
                    "bad_frequency",
                    format!("column frequency: {frequency} coupons a year is not one of 1, 2, 4, 12"),
                ));
            }
            let maturity = required_date(f.cell(5, i), BONDS, "maturity", src, row)?;
            let dc_text = required_text(f.cell(6, i), BONDS, "day_count", src, row)?.text().unwrap_or_default();
            let day_count: DayCount = dc_text.parse().map_err(|e: crate::time::daycount::DayCountError| {
                Reject::new(BONDS, src, row, "unknown_day_count", format!("column day_count: {e}"))
            })?;
            let issue_date = match f.cell(7, i).date() {
                Ok(d) => d,
                Err(()) => {
                    return Err(Reject::new(
                        BONDS,
                        src,
                        row,
                        "unparseable_date",
                        format!("column issue_date: {} is not an ISO date", f.cell(7, i).show()),
                    ))
                }
            };
            if issue_date.is_some_and(|d| d >= maturity) {
                return Err(Reject::new(
                    BONDS,
                    src,
                    row,
                    "issue_after_maturity",
                    format!("issue date {} is not before maturity {maturity}", issue_date.unwrap()),
                ));
            }
            Ok(BondRow {
                bond,
                entity,
                currency,
                coupon,
                frequency,
                maturity,
                day_count,
                issue_date,
                seniority: text(f.cell(8, i)),
            })
        },
    )
}

// ---------------------------------------------------------------- bond_quotes

pub const BOND_QUOTES: &str = "bond_quotes";

/// A clean price in percent of face value.
#[derive(Debug, Clone, PartialEq)]
pub struct BondQuoteRow {
    pub date: NaiveDate,
    pub bond: String,
    pub clean_price: f64,
}

pub fn read_bond_quotes(path: &Path, cal: &Calendar, band: (f64, f64)) -> Result<Rows<BondQuoteRow>> {
    const SPECS: &[ColumnSpec] = &[
        ColumnSpec { name: "date", kind: Kind::Date, required: true },
        ColumnSpec { name: "bond", kind: Kind::Text, required: true },
        ColumnSpec { name: "clean_price", kind: Kind::Number, required: true },
    ];
    read_rows(
        BOND_QUOTES,
        path,
        SPECS,
        |f, i| (f.cell(0, i).date().ok().flatten(), None, text(f.cell(1, i)).unwrap_or_default()),
        |f, i, src, row| {
            let date = required_date(f.cell(0, i), BOND_QUOTES, "date", src, row)?;
            let bond = required_text(f.cell(1, i), BOND_QUOTES, "bond", src, row)?.text().unwrap_or_default();
            if !cal.is_business_day(date) {
                return Err(Reject::new(
                    BOND_QUOTES,
                    src,
                    row,
                    "non_business_day",
                    format!("column date: {date} is a weekend day or listed holiday"),
                ));
            }
            let p = number(f.cell(2, i), BOND_QUOTES, "clean_price", src, row)?.ok_or_else(|| {
                Reject::new(BOND_QUOTES, src, row, "missing_value", "column clean_price is empty".into())
            })?;
            if p < band.0 || p > band.1 {
                return Err(Reject::new(
                    BOND_QUOTES,
                    src,
                    row,
                    "implausible_price",
                    format!(
                        "column clean_price: {p} is outside the plausible band [{}, {}] (percent of face)",
                        band.0, band.1
                    ),
                ));
            }
            Ok(BondQuoteRow { date, bond, clean_price: p })
        },
    )
}
