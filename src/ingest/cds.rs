//! The `cds_quotes` table: date, entity, currency, tenor, par_spread_bp, with optional
//! recovery, upfront, coupon_bp, seniority. A row carries either a par spread or an upfront
//! with its running coupon.

use super::source::{read_table, Cell, ColumnSpec, Kind, RawTable, Reject};
use crate::error::Result;
use crate::instruments::CdsQuote;
use crate::time::{Calendar, Tenor};
use chrono::NaiveDate;
use std::collections::HashMap;
use std::path::Path;

pub const TABLE: &str = "cds_quotes";

const SPECS: &[ColumnSpec] = &[
    ColumnSpec { name: "date", kind: Kind::Date, required: true },
    ColumnSpec { name: "entity", kind: Kind::Text, required: true },
    ColumnSpec { name: "currency", kind: Kind::Text, required: true },
    ColumnSpec { name: "tenor", kind: Kind::Text, required: true },
    ColumnSpec { name: "par_spread_bp", kind: Kind::Number, required: true },
    ColumnSpec { name: "recovery", kind: Kind::Number, required: false },
    ColumnSpec { name: "upfront", kind: Kind::Number, required: false },
    ColumnSpec { name: "coupon_bp", kind: Kind::Number, required: false },
    ColumnSpec { name: "seniority", kind: Kind::Text, required: false },
];
const C_DATE: usize = 0;
const C_ENTITY: usize = 1;
const C_CCY: usize = 2;
const C_TENOR: usize = 3;
const C_SPREAD: usize = 4;
const C_RECOVERY: usize = 5;
const C_UPFRONT: usize = 6;
const C_COUPON: usize = 7;
const C_SENIORITY: usize = 8;

/// One usable CDS quote.
#[derive(Debug, Clone, PartialEq)]
pub struct CdsRow {
    pub date: NaiveDate,
    pub entity: String,
    pub currency: String,
    pub tenor: Tenor,
    pub quote: CdsQuote,
    /// As given; the caller applies the default.
    pub recovery: Option<f64>,
    pub seniority: Option<String>,
    pub source: String,
    pub row: u64,
}

/// The usable rows and the rejects of a `cds_quotes` table.
#[derive(Debug, Default)]
pub struct CdsTable {
    pub rows: Vec<CdsRow>,
    pub rejects: Vec<Reject>,
    pub rows_in: usize,
    pub ignored_columns: Vec<String>,
}

/// Reads and checks the quotes at `path`.
pub fn read(path: &Path, cal: &Calendar) -> Result<CdsTable> {
    let raw = read_table(TABLE, path, SPECS)?;
    Ok(parse(&raw, cal))
}

fn reject(source: &str, row: u64, reason: &'static str, detail: String) -> Reject {
    Reject { table: TABLE, source: source.to_string(), row, reason, detail }
}

/// Interprets the rows of a raw table (exposed so tests can feed tables built in memory).
pub fn parse(raw: &RawTable, cal: &Calendar) -> CdsTable {
    let mut out = CdsTable { rows_in: raw.rows(), ignored_columns: raw.ignored_columns.clone(), ..Default::default() };
    for file in &raw.files {
        let src = file.source();
        for i in 0..file.height {
            let row = i as u64 + 1;
            match parse_row(file, i, &src, row, cal) {
                Ok(r) => out.rows.push(r),
                Err(rej) => out.rejects.push(rej),
            }
        }
    }
    dedupe(&mut out);
    out
}

fn number(cell: Cell<'_>, column: &str, src: &str, row: u64) -> std::result::Result<Option<f64>, Reject> {
    cell.number().map_err(|_| {
        reject(src, row, "unparseable_number", format!("column {column}: {} is not a number", cell.show()))
    }).and_then(|v| match v {
        Some(x) if !x.is_finite() => Err(reject(src, row, "unparseable_number", format!("column {column}: {x} is not a finite number"))),
        other => Ok(other),
    })
}

fn parse_row(file: &super::source::RawFile, i: usize, src: &str, row: u64, cal: &Calendar) -> std::result::Result<CdsRow, Reject> {
    let date_cell = file.cell(C_DATE, i);
    let date = match date_cell.date() {
        Ok(Some(d)) => d,
        Ok(None) => return Err(reject(src, row, "missing_value", "column date is empty".into())),
        Err(()) => return Err(reject(src, row, "bad_date", format!("column date: {} is not an ISO date yyyy-mm-dd", date_cell.show()))),
    };
    if !cal.is_business_day(date) {
        return Err(reject(src, row, "non_business_day", format!("column date: {date} is a weekend or holiday")));
    }
    let entity = file.cell(C_ENTITY, i).text().ok_or_else(|| reject(src, row, "missing_value", "column entity is empty".into()))?;
    let currency = file.cell(C_CCY, i).text().ok_or_else(|| reject(src, row, "missing_value", "column currency is empty".into()))?;
    let tenor_cell = file.cell(C_TENOR, i);
    let tenor_text = tenor_cell.text().ok_or_else(|| reject(src, row, "missing_value", "column tenor is empty".into()))?;
    let tenor: Tenor = tenor_text
        .parse()
        .map_err(|e: crate::time::tenor::TenorError| reject(src, row, "unknown_tenor", format!("column tenor: {e}")))?;
    if tenor.months() % 3 != 0 {
        return Err(reject(src, row, "non_standard_tenor", format!("column tenor: {tenor} is not a whole number of quarters, as standard CDS tenors are")));
    }
    let spread = number(file.cell(C_SPREAD, i), "par_spread_bp", src, row)?;
    let upfront = number(file.cell(C_UPFRONT, i), "upfront", src, row)?;
    let coupon = number(file.cell(C_COUPON, i), "coupon_bp", src, row)?;
    let quote = match (spread, upfront, coupon) {
        (Some(s), _, _) if s <= 0.0 => {
            return Err(reject(src, row, "non_positive_spread", format!("column par_spread_bp: {s} bp is not positive")))
        }
        (Some(s), _, _) => CdsQuote::ParSpread(s / 1e4),
        (None, Some(u), Some(c)) if c < 0.0 => {
            return Err(reject(src, row, "negative_coupon", format!("column coupon_bp: {c} bp is negative (upfront {u})")))
        }
        (None, Some(u), Some(_)) if u >= 1.0 || u <= -1.0 => {
            return Err(reject(src, row, "bad_upfront", format!("column upfront: {u} is not a fraction of notional between -1 and 1")))
        }
        (None, Some(u), Some(c)) => CdsQuote::Upfront { upfront: u, coupon: c / 1e4 },
        (None, Some(_), None) => {
            return Err(reject(src, row, "missing_value", "column coupon_bp is empty: an upfront quote needs its running coupon".into()))
        }
        (None, None, _) => {
            return Err(reject(src, row, "missing_value", "no quote: par_spread_bp is empty and there is no upfront".into()))
        }
    };
    let recovery = number(file.cell(C_RECOVERY, i), "recovery", src, row)?;
    if let Some(r) = recovery {
        if !(0.0..1.0).contains(&r) {
            return Err(reject(src, row, "bad_recovery", format!("column recovery: {r} is not a fraction in [0, 1)")));
        }
    }
    let seniority = file.cell(C_SENIORITY, i).text();
    Ok(CdsRow { date, entity, currency, tenor, quote, recovery, seniority, source: src.to_string(), row })
}

/// Duplicate keys (date, entity, currency, tenor): identical repeats keep the first row;
/// conflicting values reject every row of the key, since no rule can say which is right.
fn dedupe(t: &mut CdsTable) {
    let mut first: HashMap<(NaiveDate, String, String, Tenor), usize> = HashMap::new();
    let mut conflicting: Vec<bool> = vec![false; t.rows.len()];
    let mut drop: Vec<Option<(&'static str, String)>> = vec![None; t.rows.len()];
    for (i, r) in t.rows.iter().enumerate() {
        let key = (r.date, r.entity.clone(), r.currency.clone(), r.tenor);
        match first.get(&key) {
            None => {
                first.insert(key, i);
            }
            Some(&j) => {
                let f = &t.rows[j];
                if f.quote == r.quote && f.recovery == r.recovery {
                    drop[i] = Some(("duplicate_row", format!("repeats {} row {} for {} {} {}", f.source, f.row, r.date, r.entity, r.tenor)));
                } else {
                    conflicting[j] = true;
                    drop[i] = Some(("conflicting_duplicate", format!("{} {} {} {} is also quoted, differently, in {} row {}", r.date, r.entity, r.currency, r.tenor, f.source, f.row)));
                }
            }
        }
    }
    let rows = std::mem::take(&mut t.rows);
    for (i, r) in rows.into_iter().enumerate() {
        if let Some((reason, detail)) = drop[i].take() {
            t.rejects.push(reject(&r.source, r.row, reason, detail));
        } else if conflicting[i] {
            t.rejects.push(reject(&r.source, r.row, "conflicting_duplicate", format!("{} {} {} {} is quoted more than once with different values", r.date, r.entity, r.currency, r.tenor)));
        } else {
            t.rows.push(r);
        }
    }
}
