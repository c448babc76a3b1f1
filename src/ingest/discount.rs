//! The `discount` table: date, currency, tenor, zero_rate (continuously compounded,
//! Actual/365 Fixed, decimal).

use super::cds::{number, required_date, required_text};
use super::source::{read_table_batches, ColumnSpec, Kind, Reject, TableInfo};
use crate::error::Result;
use crate::time::Tenor;
use chrono::NaiveDate;
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
    pub info: TableInfo,
}

/// Reads the zero rates; a rate outside `band` (decimal, inclusive) is rejected as implausible.
pub fn read(path: &Path, band: (f64, f64)) -> Result<DiscountTable> {
    let mut out = DiscountTable::default();
    let info = read_table_batches(TABLE, path, SPECS, |file| {
        let src = file.source();
        for i in 0..file.height {
            let row = file.file_row(i);
            let r = (|| {
                let date = required_date(file.cell(0, i), TABLE, "date", &src, row)?;
                let currency = required_text(file.cell(1, i), TABLE, "currency", &src, row)?.text().unwrap_or_default();
                let tenor_text = required_text(file.cell(2, i), TABLE, "tenor", &src, row)?.text().unwrap_or_default();
                let tenor: Tenor = tenor_text.parse().map_err(|e: crate::time::tenor::TenorError| {
                    Reject::new(TABLE, &src, row, "unknown_tenor", format!("column tenor: {e}"))
                })?;
                let z = number(file.cell(3, i), TABLE, "zero_rate", &src, row)?.ok_or_else(|| {
                    Reject::new(TABLE, &src, row, "missing_value", "column zero_rate is empty".into())
                })?;
                if z < band.0 || z > band.1 {
                    return Err(Reject::new(
                        TABLE,
                        &src,
                        row,
                        "implausible_rate",
                        format!(
                            "column zero_rate: {z} is outside the plausible band [{}, {}] (decimal, not percent)",
                            band.0, band.1
                        ),
                    ));
                }
                Ok(DiscountRow { date, currency, tenor, zero_rate: z, source: src.clone(), row })
            })();
            match r {
                Ok(r) => out.rows.push(r),
                Err(mut e) => {
                    e.date = file.cell(0, i).date().ok().flatten();
                    e.key = [file.cell(1, i).text(), file.cell(2, i).text()]
                        .into_iter()
                        .flatten()
                        .collect::<Vec<_>>()
                        .join(" ");
                    out.rejects.push(e)
                }
            }
        }
    })?;
    out.info = info;
    dedupe(&mut out);
    Ok(out)
}

/// Duplicate pillars: identical repeats keep the first; conflicting values reject the key.
fn dedupe(out: &mut DiscountTable) {
    let mut order: Vec<usize> = (0..out.rows.len()).collect();
    order.sort_by(|&a, &b| {
        let (x, y) = (&out.rows[a], &out.rows[b]);
        (x.date, &x.currency, x.tenor, a).cmp(&(y.date, &y.currency, y.tenor, b))
    });
    let mut drop: Vec<Option<(&'static str, String)>> = vec![None; out.rows.len()];
    let mut i = 0;
    while i < order.len() {
        let first = &out.rows[order[i]];
        let mut j = i + 1;
        while j < order.len() {
            let r = &out.rows[order[j]];
            if (r.date, &r.currency, r.tenor) != (first.date, &first.currency, first.tenor) {
                break;
            }
            j += 1;
        }
        if j - i > 1 {
            let conflicting = order[i + 1..j].iter().any(|&k| out.rows[k].zero_rate != first.zero_rate);
            for (n, &k) in order[i..j].iter().enumerate() {
                if conflicting {
                    drop[k] = Some((
                        "conflicting_duplicate",
                        format!(
                            "{} {} {} is given {} times with different rates",
                            first.date,
                            first.currency,
                            first.tenor,
                            j - i
                        ),
                    ));
                } else if n > 0 {
                    drop[k] = Some(("duplicate_row", format!("repeats {} row {}", first.source, first.row)));
                }
            }
        }
        i = j;
    }
    let rows = std::mem::take(&mut out.rows);
    for (k, r) in rows.into_iter().enumerate() {
        match drop[k].take() {
            Some((reason, detail)) => {
                let mut rej = Reject::new(TABLE, &r.source, r.row, reason, detail);
                rej.date = Some(r.date);
                rej.key = format!("{} {}", r.currency, r.tenor);
                out.rejects.push(rej);
            }
            None => out.rows.push(r),
        }
    }
}
