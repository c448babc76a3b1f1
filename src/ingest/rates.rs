//! The `rate_quotes` table: date, currency, instrument (`deposit` or `swap`), tenor, rate
//! (decimal). Each (date, currency) whose discount curve the `discount` table does not give is
//! built from these quotes as the standard curve (`curves::rates`), with the currency's
//! conventions (`[rate_conventions]` in the pipeline file, else the defaults).

use super::cds::{number, required_date, required_text};
use super::source::{read_table_batches, ColumnSpec, Kind, Reject, TableInfo};
use crate::curves::rates::RateInstrument;
use crate::error::Result;
use crate::time::Tenor;
use chrono::NaiveDate;
use std::path::Path;

pub const TABLE: &str = "rate_quotes";

const SPECS: &[ColumnSpec] = &[
    ColumnSpec { name: "date", kind: Kind::Date, required: true },
    ColumnSpec { name: "currency", kind: Kind::Text, required: true },
    ColumnSpec { name: "instrument", kind: Kind::Text, required: true },
    ColumnSpec { name: "tenor", kind: Kind::Text, required: true },
    ColumnSpec { name: "rate", kind: Kind::Number, required: true },
];

/// One usable rate quote.
#[derive(Debug, Clone, PartialEq)]
pub struct RateQuoteRow {
    pub date: NaiveDate,
    pub currency: String,
    pub instrument: RateInstrument,
    pub tenor: Tenor,
    pub rate: f64,
    pub source: String,
    pub row: u64,
}

#[derive(Debug, Default)]
pub struct RateQuoteTable {
    pub rows: Vec<RateQuoteRow>,
    pub rejects: Vec<Reject>,
    pub info: TableInfo,
}

/// Reads the rate quotes; a rate outside `band` (decimal, inclusive) is rejected as implausible.
pub fn read(path: &Path, band: (f64, f64)) -> Result<RateQuoteTable> {
    let mut out = RateQuoteTable::default();
    let info = read_table_batches(TABLE, path, SPECS, |file| {
        let src = file.source();
        for i in 0..file.height {
            let row = file.file_row(i);
            let r = (|| {
                let reject = |reason: &'static str, detail: String| Reject::new(TABLE, &src, row, reason, detail);
                let date = required_date(file.cell(0, i), TABLE, "date", &src, row)?;
                let currency = required_text(file.cell(1, i), TABLE, "currency", &src, row)?.text().unwrap_or_default();
                let text = required_text(file.cell(2, i), TABLE, "instrument", &src, row)?.text().unwrap_or_default();
                let instrument = RateInstrument::parse(&text.to_ascii_lowercase()).ok_or_else(|| {
                    reject("unknown_instrument", format!("column instrument: {text:?} is not deposit or swap"))
                })?;
                let tenor_text = required_text(file.cell(3, i), TABLE, "tenor", &src, row)?.text().unwrap_or_default();
                let tenor: Tenor = tenor_text.parse().map_err(|e: crate::time::tenor::TenorError| {
                    reject("unknown_tenor", format!("column tenor: {e}"))
                })?;
                let rate = number(file.cell(4, i), TABLE, "rate", &src, row)?
                    .ok_or_else(|| reject("missing_value", "column rate is empty".into()))?;
                if rate < band.0 || rate > band.1 {
                    return Err(reject(
                        "implausible_rate",
                        format!(
                            "column rate: {rate} is outside the plausible band [{}, {}] (decimal, not percent)",
                            band.0, band.1
                        ),
                    ));
                }
                Ok(RateQuoteRow { date, currency, instrument, tenor, rate, source: src.clone(), row })
            })();
            match r {
                Ok(r) => out.rows.push(r),
                Err(mut e) => {
                    e.date = file.cell(0, i).date().ok().flatten();
                    e.key = [file.cell(1, i).text(), file.cell(2, i).text(), file.cell(3, i).text()]
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

/// Duplicate quotes: identical repeats keep the first; conflicting rates reject the key.
fn dedupe(out: &mut RateQuoteTable) {
    let key = |r: &RateQuoteRow| (r.date, r.currency.clone(), r.instrument, r.tenor);
    let mut order: Vec<usize> = (0..out.rows.len()).collect();
    order.sort_by(|&a, &b| (key(&out.rows[a]), a).cmp(&(key(&out.rows[b]), b)));
    let mut drop: Vec<Option<(&'static str, String)>> = vec![None; out.rows.len()];
    let mut i = 0;
    while i < order.len() {
        let first = &out.rows[order[i]];
        let mut j = i + 1;
        while j < order.len() && key(&out.rows[order[j]]) == key(first) {
            j += 1;
        }
        if j - i > 1 {
            let conflicting = order[i + 1..j].iter().any(|&k| out.rows[k].rate != first.rate);
            for (n, &k) in order[i..j].iter().enumerate() {
                if conflicting {
                    drop[k] = Some((
                        "conflicting_duplicate",
                        format!(
                            "{} {} {} {} is given {} times with different rates",
                            first.date,
                            first.currency,
                            first.instrument.as_str(),
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
                rej.key = format!("{} {} {}", r.currency, r.instrument.as_str(), r.tenor);
                out.rejects.push(rej);
            }
            None => out.rows.push(r),
        }
    }
}
