//! Loading every input table of a review and applying the data-quality rules across them.
//!
//! Order: entities, defaults, grades, cohort_history, discount, rate_quotes, bonds,
//! bond_quotes, cds_quotes; later tables are checked against earlier ones (unknown entity, unknown bond,
//! quote after default). The result holds the usable rows, every reject, the non-rejecting
//! flags, and the counts that prove rows in = rows used + rows rejected.

use super::cds::{self, CdsPanel, CdsQuoteRow, CdsRowRules};
use super::discount::{self, DiscountTable};
use super::quality::{check_cds, QualityFlag, QualitySettings, FLAG_SPIKE, FLAG_STALE};
use super::source::Reject;
use super::tables::*;
use crate::error::{Error, Result};
use crate::time::Calendar;
use chrono::NaiveDate;
use std::collections::{BTreeMap, HashMap, HashSet};
use std::path::PathBuf;

/// Every input table, in load order (the order of the rejects table).
pub const INPUT_TABLES: [&str; 9] = [
    "entities",
    "defaults",
    "grades",
    "cohort_history",
    "discount",
    "rate_quotes",
    "bonds",
    "bond_quotes",
    "cds_quotes",
];

/// Where each input table is; any may be absent.
#[derive(Debug, Clone, Default)]
pub struct InputPaths {
    pub cds_quotes: Option<PathBuf>,
    pub discount: Option<PathBuf>,
    pub rate_quotes: Option<PathBuf>,
    pub bonds: Option<PathBuf>,
    pub bond_quotes: Option<PathBuf>,
    pub entities: Option<PathBuf>,
    pub grades: Option<PathBuf>,
    pub defaults: Option<PathBuf>,
    pub cohort_history: Option<PathBuf>,
}

/// Row accounting of one table.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct TableCounts {
    pub table: &'static str,
    pub rows_in: usize,
    pub used: usize,
    pub rejected: usize,
    /// Used rows that carry at least one quality flag.
    pub flagged: usize,
    pub files: Vec<PathBuf>,
}

/// One row of the data_quality table: per table and date (`scope` = `date`), per table with
/// no date column (`table`), or per entity of the CDS panel (`entity`).
#[derive(Debug, Clone, PartialEq)]
pub struct DataQualityRow {
    pub scope: &'static str,
    pub table: &'static str,
    pub date: Option<NaiveDate>,
    pub entity: Option<String>,
    pub rows_read: u64,
    pub rows_used: u64,
    pub rows_rejected: u64,
    pub rows_flagged: u64,
    pub first_date: Option<NaiveDate>,
    pub last_date: Option<NaiveDate>,
    /// Business days with at least one usable quote.
    pub days_quoted: Option<u64>,
    /// days_quoted over the business days of the panel's whole date range.
    pub coverage: Option<f64>,
    pub stale_rows: Option<u64>,
    pub spike_rows: Option<u64>,
}

/// Everything ingestion produced.
#[derive(Debug, Default)]
pub struct Dataset {
    pub cds: Option<CdsPanel>,
    /// Flag bits per row of `cds.rows`.
    pub cds_flags: Vec<u8>,
    pub discount: Option<DiscountTable>,
    pub rate_quotes: Option<super::rates::RateQuoteTable>,
    pub bonds: Option<Rows<BondRow>>,
    pub bond_quotes: Option<Rows<BondQuoteRow>>,
    pub entities: Option<Rows<EntityRow>>,
    pub grades: Option<Rows<GradeRow>>,
    pub defaults: Option<Rows<DefaultRow>>,
    pub cohort_history: Option<Rows<CohortHistoryRow>>,
    /// All rejects, in table order then source and row.
    pub rejects: Vec<Reject>,
    pub flags: Vec<QualityFlag>,
    pub counts: Vec<TableCounts>,
    pub data_quality: Vec<DataQualityRow>,
}

impl Dataset {
    /// Shows every source file relative to `base` (the pipeline file's folder), so that
    /// rejects and flags read the same whichever way the pipeline file was named.
    pub fn relabel_sources(&mut self, base: &std::path::Path) {
        let rel = |s: &str| super::files::relative(std::path::Path::new(s), base);
        for r in &mut self.rejects {
            r.source = rel(&r.source);
        }
        for f in &mut self.flags {
            f.source = rel(&f.source);
        }
        if let Some(p) = &mut self.cds {
            for f in &mut p.files {
                *f = rel(f);
            }
        }
        if let Some(d) = &mut self.discount {
            for r in &mut d.rows {
                r.source = rel(&r.source);
            }
        }
        if let Some(d) = &mut self.rate_quotes {
            for r in &mut d.rows {
                r.source = rel(&r.source);
            }
        }
        if let Some(t) = &mut self.bonds {
            for (_, p) in &mut t.rows {
                p.source = rel(&p.source);
            }
        }
        if let Some(t) = &mut self.bond_quotes {
            for (_, p) in &mut t.rows {
                p.source = rel(&p.source);
            }
        }
    }

    /// First default date per entity name.
    pub fn first_defaults(&self) -> HashMap<String, NaiveDate> {
        let mut m: HashMap<String, NaiveDate> = HashMap::new();
        if let Some(d) = &self.defaults {
            for (r, _) in &d.rows {
                m.entry(r.entity.clone()).and_modify(|x| *x = (*x).min(r.default_date)).or_insert(r.default_date);
            }
        }
        m
    }
}

/// Settles duplicate keys of a small table: identical repeats keep the first; conflicting
/// values reject every row of the key.
fn dedupe<T: PartialEq, K: Ord + Clone>(
    t: &mut Rows<T>,
    table: &'static str,
    key: impl Fn(&T) -> K,
    describe: impl Fn(&T) -> String,
) {
    let mut groups: BTreeMap<K, Vec<usize>> = BTreeMap::new();
    for (i, (r, _)) in t.rows.iter().enumerate() {
        groups.entry(key(r)).or_default().push(i);
    }
    let mut drop: Vec<Option<(&'static str, String)>> = (0..t.rows.len()).map(|_| None).collect();
    for idx in groups.values().filter(|g| g.len() > 1) {
        let first = &t.rows[idx[0]];
        let conflicting = idx[1..].iter().any(|&i| t.rows[i].0 != first.0);
        for (m, &i) in idx.iter().enumerate() {
            if conflicting {
                drop[i] = Some((
                    "conflicting_duplicate",
                    format!("{} is given {} times with different values; none is used", describe(&first.0), idx.len()),
                ));
            } else if m > 0 {
                drop[i] = Some(("duplicate_row", format!("repeats {} row {}", first.1.source, first.1.row)));
            }
        }
    }
    reject_marked(t, table, drop, &describe);
}

fn reject_marked<T>(
    t: &mut Rows<T>,
    table: &'static str,
    drop: Vec<Option<(&'static str, String)>>,
    describe: &dyn Fn(&T) -> String,
) {
    let rows = std::mem::take(&mut t.rows);
    for ((r, p), d) in rows.into_iter().zip(drop) {
        match d {
            Some((reason, detail)) => {
                let mut rej = Reject::new(table, &p.source, p.row, reason, detail);
                rej.key = describe(&r);
                t.rejects.push(rej);
            }
            None => t.rows.push((r, p)),
        }
    }
}

fn filter_rows<T>(
    t: &mut Rows<T>,
    table: &'static str,
    test: impl Fn(&T) -> Option<(&'static str, String)>,
    describe: impl Fn(&T) -> String,
) {
    let drop: Vec<_> = t.rows.iter().map(|(r, _)| test(r)).collect();
    reject_marked(t, table, drop, &describe);
}

fn counts<T>(table: &'static str, t: &Rows<T>) -> TableCounts {
    TableCounts {
        table,
        rows_in: t.info.rows,
        used: t.rows.len(),
        rejected: t.rejects.len(),
        flagged: 0,
        files: t.info.files.clone(),
    }
}

/// Reads every given table and applies all data-quality rules.
/// First and last date of the quotes a curve can be built from: usable rows dated on a day with
/// a discount pillar of their currency (calibration rejects the others as `no_discount_curve`).
/// A stray row far from the data, a 9999-12-31 typed for 2019-12-31, then neither names the
/// run nor stretches its period. Without a discount table (or when no row has one), the usable
/// rows' own first and last dates.
fn usable_period(
    panel: &CdsPanel,
    discount: Option<&DiscountTable>,
    rates: Option<&super::rates::RateQuoteTable>,
) -> Option<(NaiveDate, NaiveDate)> {
    let rows = &panel.rows;
    let all = Some((rows.first()?.date, rows.last()?.date));
    if discount.is_none() && rates.is_none() {
        return all;
    }
    let pillars: crate::hash::FastSet<(NaiveDate, &str)> = discount
        .iter()
        .flat_map(|d| d.rows.iter().map(|r| (r.date, r.currency.as_str())))
        .chain(rates.iter().flat_map(|d| d.rows.iter().map(|r| (r.date, r.currency.as_str()))))
        .collect();
    let priced = |r: &&CdsQuoteRow| pillars.contains(&(r.date, panel.currencies.name(r.currency)));
    match (rows.iter().find(priced), rows.iter().rev().find(priced)) {
        (Some(a), Some(b)) => Some((a.date, b.date)),
        _ => all,
    }
}

pub fn load(paths: &InputPaths, cal: &Calendar, q: &QualitySettings) -> Result<Dataset> {
    let mut ds = Dataset::default();

    if let Some(p) = &paths.entities {
        let mut t = read_entities(p)?;
        dedupe(&mut t, ENTITIES, |r| r.entity.clone(), |r| format!("entity {}", r.entity));
        ds.entities = Some(t);
    }
    let known: Option<HashSet<String>> =
        ds.entities.as_ref().map(|t| t.rows.iter().map(|(r, _)| r.entity.clone()).collect());
    let unknown = |e: &str| -> Option<(&'static str, String)> {
        match &known {
            Some(k) if !k.contains(e) => Some(("unknown_entity", format!("entity {e} is not in the entities table"))),
            _ => None,
        }
    };

    if let Some(p) = &paths.defaults {
        let mut t = read_defaults(p)?;
        filter_rows(&mut t, DEFAULTS, |r| unknown(&r.entity), |r| format!("{} {}", r.entity, r.default_date));
        dedupe(
            &mut t,
            DEFAULTS,
            |r| (r.entity.clone(), r.default_date),
            |r| format!("default of {} on {}", r.entity, r.default_date),
        );
        ds.defaults = Some(t);
    }
    let first_default = ds.first_defaults();

    if let Some(p) = &paths.grades {
        let mut t = read_grades(p)?;
        filter_rows(&mut t, GRADES, |r| unknown(&r.entity), |r| format!("{} from {}", r.entity, r.from_date));
        dedupe(
            &mut t,
            GRADES,
            |r| (r.entity.clone(), r.from_date),
            |r| format!("grade of {} from {}", r.entity, r.from_date),
        );
        ds.grades = Some(t);
    }
    if let Some(p) = &paths.cohort_history {
        let mut t = read_cohort_history(p)?;
        dedupe(&mut t, COHORT_HISTORY, |r| (r.year, r.grade), |r| format!("year {} grade {}", r.year, r.grade));
        ds.cohort_history = Some(t);
    }
    if let Some(p) = &paths.discount {
        ds.discount = Some(discount::read(p, q.zero_rate_band)?);
    }
    if let Some(p) = &paths.rate_quotes {
        ds.rate_quotes = Some(super::rates::read(p, q.zero_rate_band)?);
    }
    if let Some(p) = &paths.bonds {
        let mut t = read_bonds(p)?;
        filter_rows(&mut t, BONDS, |r| unknown(&r.entity), |r| format!("bond {}", r.bond));
        dedupe(&mut t, BONDS, |r| r.bond.clone(), |r| format!("bond {}", r.bond));
        ds.bonds = Some(t);
    }
    if let Some(p) = &paths.bond_quotes {
        let mut t = read_bond_quotes(p, cal, q.bond_price_band)?;
        let issuer: Option<HashMap<String, String>> =
            ds.bonds.as_ref().map(|b| b.rows.iter().map(|(r, _)| (r.bond.clone(), r.entity.clone())).collect());
        filter_rows(
            &mut t,
            BOND_QUOTES,
            |r| match &issuer {
                Some(m) => match m.get(&r.bond) {
                    None => Some(("unknown_bond", format!("bond {} is not in the bonds table", r.bond))),
                    Some(e) => match first_default.get(e) {
                        Some(d) if r.date > *d => Some((
                            "after_default",
                            format!("price dated {} after the issuer {e} defaulted on {d}", r.date),
                        )),
                        _ => None,
                    },
                },
                None => None,
            },
            |r| format!("{} {}", r.date, r.bond),
        );
        dedupe(&mut t, BOND_QUOTES, |r| (r.date, r.bond.clone()), |r| format!("price of {} on {}", r.bond, r.date));
        ds.bond_quotes = Some(t);
    }
    if let Some(p) = &paths.cds_quotes {
        let mut panel =
            cds::read(p, cal, &CdsRowRules { max_spread_bp: q.max_spread_bp, min_spread_bp: q.min_spread_bp })?;
        let by_id: Vec<Option<NaiveDate>> =
            (0..panel.entities.len() as u32).map(|i| first_default.get(panel.entities.name(i)).copied()).collect();
        let (bits, flags) = check_cds(&mut panel, &by_id, q);
        ds.cds_flags = bits;
        ds.flags.extend(flags);
        panel.period = usable_period(&panel, ds.discount.as_ref(), ds.rate_quotes.as_ref());
        ds.cds = Some(panel);
    }

    // Accounting and the data-quality table.
    if let Some(t) = &ds.entities {
        ds.counts.push(counts(ENTITIES, t));
    }
    if let Some(t) = &ds.defaults {
        ds.counts.push(counts(DEFAULTS, t));
    }
    if let Some(t) = &ds.grades {
        ds.counts.push(counts(GRADES, t));
    }
    if let Some(t) = &ds.cohort_history {
        ds.counts.push(counts(COHORT_HISTORY, t));
    }
    if let Some(t) = &ds.discount {
        ds.counts.push(TableCounts {
            table: discount::TABLE,
            rows_in: t.info.rows,
            used: t.rows.len(),
            rejected: t.rejects.len(),
            flagged: 0,
            files: t.info.files.clone(),
        });
    }
    if let Some(t) = &ds.rate_quotes {
        ds.counts.push(TableCounts {
            table: super::rates::TABLE,
            rows_in: t.info.rows,
            used: t.rows.len(),
            rejected: t.rejects.len(),
            flagged: 0,
            files: t.info.files.clone(),
        });
    }
    if let Some(t) = &ds.bonds {
        ds.counts.push(counts(BONDS, t));
    }
    if let Some(t) = &ds.bond_quotes {
        ds.counts.push(counts(BOND_QUOTES, t));
    }
    if let Some(p) = &ds.cds {
        ds.counts.push(TableCounts {
            table: cds::TABLE,
            rows_in: p.info.rows,
            used: p.rows.len(),
            rejected: p.rejects.len(),
            flagged: ds.cds_flags.iter().filter(|&&b| b != 0).count(),
            files: p.info.files.clone(),
        });
    }
    for c in &ds.counts {
        if c.rows_in != c.used + c.rejected {
            return Err(Error::Accounting {
                table: c.table.to_string(),
                after: "",
                rows_in: c.rows_in,
                used: c.used,
                rejected: c.rejected,
            });
        }
    }
    collect_rejects(&mut ds);
    ds.data_quality = data_quality(&ds, cal);
    Ok(ds)
}

fn collect_rejects(ds: &mut Dataset) {
    let mut all: Vec<Reject> = Vec::new();
    macro_rules! take {
        ($t:expr) => {
            if let Some(t) = $t.as_mut() {
                all.append(&mut t.rejects);
            }
        };
    }
    take!(ds.entities);
    take!(ds.defaults);
    take!(ds.grades);
    take!(ds.cohort_history);
    take!(ds.discount);
    take!(ds.rate_quotes);
    take!(ds.bonds);
    take!(ds.bond_quotes);
    take!(ds.cds);
    let order = |t: &str| INPUT_TABLES.iter().position(|x| *x == t).unwrap_or(99);
    all.sort_by(|a, b| (order(a.table), &a.source, a.row).cmp(&(order(b.table), &b.source, b.row)));
    ds.rejects = all;
}

fn data_quality(ds: &Dataset, cal: &Calendar) -> Vec<DataQualityRow> {
    let mut out = Vec::new();
    // Per table and date: read / used / rejected / flagged.
    let mut per_date: BTreeMap<(&'static str, Option<NaiveDate>), [u64; 3]> = BTreeMap::new();
    for r in &ds.rejects {
        let dated = matches!(r.table, "cds_quotes" | "discount" | "rate_quotes" | "bond_quotes");
        per_date.entry((r.table, if dated { r.date } else { None })).or_default()[1] += 1;
    }
    if let Some(p) = &ds.cds {
        // Rows are sorted by date: one map entry per run of equal dates.
        let mut i = 0;
        while i < p.rows.len() {
            let d = p.rows[i].date;
            let (mut used, mut flagged) = (0u64, 0u64);
            while i < p.rows.len() && p.rows[i].date == d {
                used += 1;
                flagged += u64::from(p.rows[i].flags != 0);
                i += 1;
            }
            let e = per_date.entry((cds::TABLE, Some(d))).or_default();
            e[0] += used;
            e[2] += flagged;
        }
    }
    if let Some(t) = &ds.discount {
        for r in &t.rows {
            per_date.entry((discount::TABLE, Some(r.date))).or_default()[0] += 1;
        }
    }
    if let Some(t) = &ds.rate_quotes {
        for r in &t.rows {
            per_date.entry((super::rates::TABLE, Some(r.date))).or_default()[0] += 1;
        }
    }
    if let Some(t) = &ds.bond_quotes {
        for (r, _) in &t.rows {
            per_date.entry((BOND_QUOTES, Some(r.date))).or_default()[0] += 1;
        }
    }
    for c in &ds.counts {
        if !matches!(c.table, "cds_quotes" | "discount" | "rate_quotes" | "bond_quotes") {
            per_date.insert((c.table, None), [c.used as u64, 0, 0]);
        }
    }
    for r in &ds.rejects {
        if !matches!(r.table, "cds_quotes" | "discount" | "rate_quotes" | "bond_quotes") {
            per_date.entry((r.table, None)).or_default()[1] += 1;
        }
    }
    for ((table, date), [used, rejected, flagged]) in per_date {
        out.push(DataQualityRow {
            scope: if date.is_some() { "date" } else { "table" },
            table,
            date,
            entity: None,
            rows_read: used + rejected,
            rows_used: used,
            rows_rejected: rejected,
            rows_flagged: flagged,
            first_date: None,
            last_date: None,
            days_quoted: None,
            coverage: None,
            stale_rows: None,
            spike_rows: None,
        });
    }
    // Per entity of the CDS panel.
    if let Some(p) = &ds.cds {
        if let (Some(first), Some(last)) = (p.rows.first().map(|r| r.date), p.rows.last().map(|r| r.date)) {
            let mut business_days = 0u64;
            let mut d = first;
            while d <= last {
                business_days += u64::from(cal.is_business_day(d));
                match d.succ_opt() {
                    Some(n) => d = n,
                    None => break,
                }
            }
            #[derive(Default)]
            struct Acc {
                used: u64,
                flagged: u64,
                stale: u64,
                spike: u64,
                first: Option<NaiveDate>,
                last: Option<NaiveDate>,
                days: u64,
            }
            // Per entity id (rows are sorted by date, so a new date for an entity is a new day).
            let mut acc: Vec<Acc> = (0..p.entities.len()).map(|_| Acc::default()).collect();
            for r in &p.rows {
                let a = &mut acc[r.entity as usize];
                let b = r.flags;
                a.used += 1;
                a.flagged += u64::from(b != 0);
                a.stale += u64::from(b & FLAG_STALE != 0);
                a.spike += u64::from(b & FLAG_SPIKE != 0);
                if a.last != Some(r.date) {
                    a.days += 1;
                }
                a.first = Some(a.first.map_or(r.date, |x| x.min(r.date)));
                a.last = Some(r.date);
            }
            let acc: BTreeMap<String, Acc> = acc
                .into_iter()
                .enumerate()
                .filter(|(_, a)| a.used > 0)
                .map(|(i, a)| (p.entities.name(i as u32).to_string(), a))
                .collect();
            let mut rejected: HashMap<&str, u64> = HashMap::new();
            for r in ds.rejects.iter().filter(|r| r.table == cds::TABLE) {
                if let Some(e) = &r.entity {
                    *rejected.entry(e.as_str()).or_default() += 1;
                }
            }
            for (e, a) in acc {
                let rej = rejected.get(e.as_str()).copied().unwrap_or(0);
                out.push(DataQualityRow {
                    scope: "entity",
                    table: cds::TABLE,
                    date: None,
                    rows_read: a.used + rej,
                    rows_used: a.used,
                    rows_rejected: rej,
                    rows_flagged: a.flagged,
                    first_date: a.first,
                    last_date: a.last,
                    days_quoted: Some(a.days),
                    coverage: Some(a.days as f64 / business_days.max(1) as f64),
                    stale_rows: Some(a.stale),
                    spike_rows: Some(a.spike),
                    entity: Some(e),
                });
            }
        }
    }
    out
}
