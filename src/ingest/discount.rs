//! The `discount` table: date, currency, tenor, zero_rate (continuously compounded,
//! Actual/365 Fixed, decimal).

use super::source::{read_table, ColumnSpec, Kind, RawTable, Reject};
use crate::error::Result;
use crate::time::Tenor;
use chrono::NaiveDate;
use std::collections::HashMap;
use std::path::Path;

pub const TABLE: &str = "discount";

const SPECS: &[ColumnSpec] = &[
    ColumnSpec { name: "date", kind: Kind::Date, required: true },
    ColumnSpec { name: "currency", kind: Kind::Text, required: true },
    ColumnSpec { name: "tenor", kind: Kind::Text, required: true },
    ColumnSpec { name: "zero_rate", kind: Kind::Number, required: true },
];

/// One usable zero-rate pillar.
#[derive(Debug, Clone, PartialEq)]
pub struct DiscountRow {
    pub date: NaiveDate,
    pub currency: String,
    pub tenor: Tenor,
    pub zero_rate: f64,
    pub source: String,
    pub row: u64,
}

#[derive(Debug, Default)]
pub struct DiscountTable {
    pub rows: Vec<DiscountRow>,
    pub rejects: Vec<Reject>,
    pub rows_in: usize,
    pub ignored_columns: Vec<String>,
}

/// A zero rate beyond this size (in absolute value) is taken for a unit error (percent typed
/// for a decimal); real curves stay far inside it.
pub const MAX_ABS_ZERO_RATE: f64 = 0.5;

pub fn read(path: &Path) -> Result<DiscountTable> {
    let raw = read_table(TABLE, path, SPECS)?;
    Ok(parse(&raw))
}

fn reject(source: &str, row: u64, reason: &'static str, detail: String) -> Reject {
    Reject { table: TABLE, source: source.to_string(), row, reason, detail }
}

pub fn parse(raw: &RawTable) -> DiscountTable {
    let mut out = DiscountTable { rows_in: raw.rows(), ignored_columns: raw.ignored_columns.clone(), ..Default::default() };
    for file in &raw.files {
        let src = file.source();
        for i in 0..file.height {
            let row = i as u64 + 1;
            let r = (|| {
                let dc = file.cell(0, i);
                let date = match dc.date() {
                    Ok(Some(d)) => d,
                    Ok(None) => return Err(reject(&src, row, "missing_value", "column date is empty".into())),
                    Err(()) => return Err(reject(&src, row, "bad_date", format!("column date: {} is not an ISO date yyyy-mm-dd", dc.show()))),
                };
                let currency = file.cell(1, i).text().ok_or_else(|| reject(&src, row, "missing_value", "column currency is empty".into()))?;
                let tenor_text = file.cell(2, i).text().ok_or_else(|| reject(&src, row, "missing_value", "column tenor is empty".into()))?;
                let tenor: Tenor = tenor_text
                    .parse()
                    .map_err(|e: crate::time::tenor::TenorError| reject(&src, row, "unknown_tenor", format!("column tenor: {e}")))?;
                let zc = file.cell(3, i);
                let z = match zc.number() {
                    Ok(Some(z)) if z.is_finite() => z,
                    Ok(None) => return Err(reject(&src, row, "missing_value", "column zero_rate is empty".into())),
                    _ => return Err(reject(&src, row, "unparseable_number", format!("column zero_rate: {} is not a number", zc.show()))),
                };
                if z.abs() > MAX_ABS_ZERO_RATE {
                    return Err(reject(&src, row, "implausible_rate", format!("column zero_rate: {z} is not a decimal rate (|z| > {MAX_ABS_ZERO_RATE}); percent typed for a decimal?")));
                }
                Ok(DiscountRow { date, currency, tenor, zero_rate: z, source: src.clone(), row })
            })();
            match r {
                Ok(r) => out.rows.push(r),
                Err(e) => out.rejects.push(e),
            }
        }
    }
    // Duplicate pillars: identical repeats keep the first; conflicting values reject the key.
    let mut seen: HashMap<(NaiveDate, String, Tenor), usize> = HashMap::new();
    let mut bad_keys: std::collections::HashSet<(NaiveDate, String, Tenor)> = Default::default();
    let mut keep = vec![true; out.rows.len()];
    for (i, r) in out.rows.iter().enumerate() {
        let key = (r.date, r.currency.clone(), r.tenor);
        if let Some(&j) = seen.get(&key) {
            keep[i] = false;
            let f = &out.rows[j];
            if f.zero_rate == r.zero_rate {
                out.rejects.push(reject(&r.source, r.row, "duplicate_row", format!("repeats {} row {}", f.source, f.row)));
            } else {
                bad_keys.insert(key);
                out.rejects.push(reject(&r.source, r.row, "conflicting_duplicate", format!("{} {} {} also given, differently, in {} row {}", r.date, r.currency, r.tenor, f.source, f.row)));
            }
        } else {
            seen.insert(key, i);
        }
    }
    let rows = std::mem::take(&mut out.rows);
    for (i, r) in rows.into_iter().enumerate() {
        if !keep[i] {
            continue;
        }
        if bad_keys.contains(&(r.date, r.currency.clone(), r.tenor)) {
            out.rejects.push(reject(&r.source, r.row, "conflicting_duplicate", format!("{} {} {} is given more than once with different values", r.date, r.currency, r.tenor)));
        } else {
            out.rows.push(r);
        }
    }
    out
}
