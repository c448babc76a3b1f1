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
                    e.key = super::source::key_text([
                        file.cell(1, i).text(),
                        file.cell(2, i).text(),
                        file.cell(3, i).text(),
                    ]);
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
    let rows = std::mem::take(&mut out.rows);
    let rejects = &mut out.rejects;
    out.rows = super::source::dedupe_by_key(
        rows,
        |r| (r.date, r.currency.clone(), r.instrument, r.tenor),
        |a, b| a.rate == b.rate,
        |f, n| {
            format!(
                "{} {} {} {} is given {n} times with different rates",
                f.date,
                f.currency,
                f.instrument.as_str(),
                f.tenor
            )
        },
        |f| format!("repeats {} row {}", f.source, f.row),
        |r, reason, detail| {
            let mut rej = Reject::new(TABLE, &r.source, r.row, reason, detail);
            rej.date = Some(r.date);
            rej.key = format!("{} {} {}", r.currency, r.instrument.as_str(), r.tenor);
            rejects.push(rej);
        },
    );
}
