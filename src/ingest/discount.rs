//! The `discount` table: date, currency, a pillar given as `tenor` (reference date plus
//! calendar months) or as `pillar_date`, and its value as `zero_rate` (decimal, with the
//! compounding and day count of `conventions.zero_rate_compounding` and
//! `conventions.zero_rate_day_count`, continuous Act/365F by default) or as `discount_factor`.
//! A row gives exactly one pillar and one value.

use super::cds::{number, required_date, required_text};
use super::source::{read_table_batches, ColumnSpec, Kind, Reject, TableInfo};
use crate::error::Result;
use crate::time::{add_months, Tenor};
use chrono::NaiveDate;
use std::path::Path;

pub const TABLE: &str = "discount";

const SPECS: &[ColumnSpec] = &[
    ColumnSpec { name: "date", kind: Kind::Date, required: true },
    ColumnSpec { name: "currency", kind: Kind::Text, required: true },
    ColumnSpec { name: "tenor", kind: Kind::Text, required: false },
    ColumnSpec { name: "zero_rate", kind: Kind::Number, required: false },
    ColumnSpec { name: "pillar_date", kind: Kind::Date, required: false },
    ColumnSpec { name: "discount_factor", kind: Kind::Number, required: false },
];

/// The value a pillar carries.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum PillarValue {
    /// A zero rate (decimal) in the run's zero-rate convention.
    ZeroRate(f64),
    /// A discount factor from the curve's date to the pillar.
    DiscountFactor(f64),
}

/// One usable pillar.
#[derive(Debug, Clone, PartialEq)]
pub struct DiscountRow {
    pub date: NaiveDate,
    pub currency: String,
    /// The pillar as the row gives it: a tenor (`5Y`) or a date.
    pub pillar: String,
    /// The pillar's date: `date` plus the tenor's months, or the given date.
    pub pillar_date: NaiveDate,
    pub value: PillarValue,
    pub source: String,
    pub row: u64,
}

/// A discount factor outside (0, this] is refused as implausible (a factor above 1 needs a
/// negative rate; above 1.5 is a typing error in any market).
const MAX_DISCOUNT_FACTOR: f64 = 1.5;

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
                let reject = |reason: &'static str, detail: String| Reject::new(TABLE, &src, row, reason, detail);
                let tenor_text = file.cell(2, i).text();
                let given_date = match file.cell(4, i).date() {
                    Ok(d) => d,
                    Err(()) => Some(required_date(file.cell(4, i), TABLE, "pillar_date", &src, row)?),
                };
                let (pillar, pillar_date) = match (tenor_text, given_date) {
                    (Some(t), None) => {
                        let tenor: Tenor = t.parse().map_err(|e: crate::time::tenor::TenorError| {
                            reject("unknown_tenor", format!("column tenor: {e}"))
                        })?;
                        (tenor.to_string(), add_months(date, tenor.months() as i32))
                    }
                    (None, Some(d)) => {
                        // The curve date itself is allowed only with the factor 1 (checked below).
                        if d < date {
                            return Err(reject(
                                "pillar_not_after_date",
                                format!("column pillar_date: {d} is not after the curve date {date}"),
                            ));
                        }
                        (d.to_string(), d)
                    }
                    (Some(t), Some(d)) => {
                        return Err(reject(
                            "ambiguous_pillar",
                            format!("the row gives both tenor {t} and pillar_date {d}; give one"),
                        ))
                    }
                    (None, None) => {
                        return Err(reject("missing_value", "the row gives neither tenor nor pillar_date".into()))
                    }
                };
                let z = number(file.cell(3, i), TABLE, "zero_rate", &src, row)?;
                let f = number(file.cell(5, i), TABLE, "discount_factor", &src, row)?;
                let value = match (z, f) {
                    (Some(z), None) => {
                        if z < band.0 || z > band.1 {
                            return Err(reject(
                                "implausible_rate",
                                format!(
                                    "column zero_rate: {z} is outside the plausible band [{}, {}] (decimal, not percent)",
                                    band.0, band.1
                                ),
                            ));
                        }
                        PillarValue::ZeroRate(z)
                    }
                    (None, Some(f)) => {
                        if !(f > 0.0 && f <= MAX_DISCOUNT_FACTOR) {
                            return Err(reject(
                                "implausible_discount_factor",
                                format!("column discount_factor: {f} is outside (0, {MAX_DISCOUNT_FACTOR}]"),
                            ));
                        }
                        PillarValue::DiscountFactor(f)
                    }
                    (Some(z), Some(f)) => {
                        return Err(reject(
                            "ambiguous_value",
                            format!("the row gives both zero_rate {z} and discount_factor {f}; give one"),
                        ))
                    }
                    (None, None) => {
                        return Err(reject(
                            "missing_value",
                            "the row gives neither zero_rate nor discount_factor".into(),
                        ))
                    }
                };
                if pillar_date == date && value != PillarValue::DiscountFactor(1.0) {
                    return Err(reject(
                        "pillar_not_after_date",
                        format!("column pillar_date: {pillar_date} is the curve date; only a discount factor of 1 may sit there"),
                    ));
                }
                Ok(DiscountRow { date, currency, pillar, pillar_date, value, source: src.clone(), row })
            })();
            match r {
                Ok(r) => out.rows.push(r),
                Err(mut e) => {
                    e.date = file.cell(0, i).date().ok().flatten();
                    e.key = super::source::key_text([
                        file.cell(1, i).text(),
                        file.cell(2, i).text().or_else(|| file.cell(4, i).text()),
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

/// Duplicate pillars: identical repeats keep the first; conflicting values reject the key.
fn dedupe(out: &mut DiscountTable) {
    let rows = std::mem::take(&mut out.rows);
    let rejects = &mut out.rejects;
    out.rows = super::source::dedupe_by_key(
        rows,
        |r| (r.date, r.currency.clone(), r.pillar_date),
        |a, b| a.value == b.value,
        |f, n| {
            format!(
                "{} {} pillar {} ({}) is given {n} times with different values",
                f.date, f.currency, f.pillar_date, f.pillar
            )
        },
        |f| format!("repeats {} row {}", f.source, f.row),
        |r, reason, detail| {
            let mut rej = Reject::new(TABLE, &r.source, r.row, reason, detail);
            rej.date = Some(r.date);
            rej.key = format!("{} {}", r.currency, r.pillar);
            rejects.push(rej);
        },
    );
}
