//! The `cds_quotes` table: date, entity, currency, tenor, par_spread_bp, with optional
//! recovery, upfront, coupon_bp, seniority, doc_clause, quoted_spread_bp, quote_type, maturity.
//! Seniority and documentation clause make the curve's tier, part of its key; a maturity off
//! the standard roll of the row's tenor prices the contract to that maturity. A row carries either a par spread (bp) or an
//! upfront (fraction of notional, positive when the protection buyer pays) with its running
//! coupon (bp).
//!
//! This reader applies the rules that one row can decide on its own; the rules that need the
//! whole series live in `quality`.

use super::source::{read_table_batches, Cell, ColumnSpec, Kind, RawFile, Reject, TableInfo};
use super::Interner;
use crate::error::Result;
use crate::instruments::CdsQuote;
use crate::time::{Calendar, Tenor};
use chrono::{Datelike, NaiveDate};
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
    ColumnSpec { name: "quoted_spread_bp", kind: Kind::Number, required: false },
    ColumnSpec { name: "quote_type", kind: Kind::Text, required: false },
    ColumnSpec { name: "doc_clause", kind: Kind::Text, required: false },
    ColumnSpec { name: "maturity", kind: Kind::Date, required: false },
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
const C_QUOTED: usize = 9;
const C_QUOTE_TYPE: usize = 10;
const C_DOC_CLAUSE: usize = 11;
const C_MATURITY: usize = 12;

/// The standard coupon (bp) of a currency the pipeline file does not list: the standard
/// contract's usual coupon for investment-grade names (common practice, no single source).
pub const DEFAULT_STANDARD_COUPON_BP: f64 = 100.0;

/// `quoted_coupon_bp` of a quoted spread without a `coupon_bp`: its currency's standard
/// coupon, looked up at calibration (a given coupon must be positive, so 0 is free).
pub const STANDARD_COUPON: f32 = 0.0;

/// One CDS quote that passed the row rules, with ids into the panel's interners.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CdsQuoteRow {
    pub date: NaiveDate,
    pub entity: u32,
    pub currency: u32,
    pub tenor: Tenor,
    pub quote: CdsQuote,
    /// As given (NaN when absent); the caller applies the default by seniority.
    pub recovery: f64,
    /// The curve's tier: an id into `CdsPanel::tiers` (seniority and documentation clause,
    /// either possibly absent).
    pub tier: u32,
    /// Index into `CdsPanel::files`.
    pub file: u32,
    /// 1-based data row in that file.
    pub row: u32,
    /// Data-quality flag bits (`quality::FLAG_*`); fits in the struct's padding.
    pub flags: u8,
    /// For a quoted-spread quote (`quote` holds the spread as a `ParSpread`), the running
    /// coupon (bp) it converts to an upfront at; NaN for a par-spread or upfront quote.
    pub quoted_coupon_bp: f32,
    /// The contract's maturity when the row's `maturity` is off the standard roll of its
    /// tenor (None: the standard roll).
    pub maturity: Option<NaiveDate>,
}

impl CdsQuoteRow {
    pub fn recovery(&self) -> Option<f64> {
        (!self.recovery.is_nan()).then_some(self.recovery)
    }

    /// Whether the row is a quoted spread (converted to an upfront at calibration).
    pub fn is_quoted_spread(&self) -> bool {
        !self.quoted_coupon_bp.is_nan()
    }

    /// The row's quote type as the tables write it.
    pub fn quote_type(&self) -> &'static str {
        match self.quote {
            _ if self.is_quoted_spread() => "quoted_spread",
            CdsQuote::ParSpread(_) => "par_spread",
            CdsQuote::Upfront { .. } => "upfront",
        }
    }

    /// Spread in bp for a par-spread or quoted-spread quote (the series the data-quality
    /// rules follow).
    pub fn spread_bp(&self) -> Option<f64> {
        match self.quote {
            CdsQuote::ParSpread(s) => Some(s * 1e4),
            CdsQuote::Upfront { .. } => None,
        }
    }
}

/// The (seniority, doc_clause) pairs of a panel, each a curve tier: two quotes of one name,
/// date and currency in different tiers belong to different curves.
#[derive(Debug, Default)]
pub struct Tiers {
    names: Interner,
    scratch: String,
}

/// Separates seniority from documentation clause in a tier's interned name: a control
/// character, which no label may hold, so the name order is (seniority, doc_clause) with an
/// absent value first.
const TIER_SEP: char = '\u{1f}';

impl Tiers {
    pub fn id(&mut self, seniority: Option<&str>, doc_clause: Option<&str>) -> u32 {
        self.scratch.clear();
        self.scratch.push_str(seniority.unwrap_or(""));
        self.scratch.push(TIER_SEP);
        self.scratch.push_str(doc_clause.unwrap_or(""));
        match self.names.get(&self.scratch) {
            Some(i) => i,
            None => self.names.id(&self.scratch.clone()),
        }
    }

    fn parts(&self, id: u32) -> (&str, &str) {
        self.names.name(id).split_once(TIER_SEP).unwrap_or_default()
    }

    pub fn seniority(&self, id: u32) -> Option<&str> {
        Some(self.parts(id).0).filter(|s| !s.is_empty())
    }

    pub fn doc_clause(&self, id: u32) -> Option<&str> {
        Some(self.parts(id).1).filter(|s| !s.is_empty())
    }

    /// The tier as the report and messages show it: `seniority/doc_clause`, either part left
    /// out when absent; empty when both are.
    pub fn label(&self, id: u32) -> String {
        tier_label(self.seniority(id), self.doc_clause(id))
    }

    /// Rank of each id in (seniority, doc_clause) order, an absent value first.
    pub fn ranks(&self) -> Vec<u32> {
        self.names.ranks()
    }

    pub fn len(&self) -> usize {
        self.names.len()
    }

    pub fn is_empty(&self) -> bool {
        self.names.is_empty()
    }
}

/// A tier as shown: `seniority/doc_clause`, an absent part left out; empty when both are.
pub fn tier_label(seniority: Option<&str>, doc_clause: Option<&str>) -> String {
    match (seniority, doc_clause) {
        (None, None) => String::new(),
        (Some(s), None) => s.to_string(),
        (None, Some(d)) => format!("/{d}"),
        (Some(s), Some(d)) => format!("{s}/{d}"),
    }
}

/// The quotes of a whole panel.
#[derive(Debug, Default)]
pub struct CdsPanel {
    pub rows: Vec<CdsQuoteRow>,
    /// First and last date of `rows` (sorted by date), kept by [`CdsPanel::release_rows`] when
    /// the rows are freed after calibration.
    pub period: Option<(chrono::NaiveDate, chrono::NaiveDate)>,
    pub entities: Interner,
    pub currencies: Interner,
    pub tiers: Tiers,
    pub files: Vec<String>,
    pub rejects: Vec<Reject>,
    pub info: TableInfo,
    /// The labels as shared text, made on first use ([`CdsPanel::shared`]).
    shared: std::sync::OnceLock<SharedLabels>,
}

/// A panel's labels as shared text: one allocation per entity, currency, seniority and
/// documentation clause, which every row of every curve that carries it points at (instead of
/// a copy per curve).
#[derive(Debug, Default)]
pub struct SharedLabels {
    entities: Vec<std::sync::Arc<str>>,
    currencies: Vec<std::sync::Arc<str>>,
    /// Per tier: its seniority and documentation clause.
    tiers: Vec<(Option<std::sync::Arc<str>>, Option<std::sync::Arc<str>>)>,
}

impl CdsPanel {
    /// The panel's labels as shared text, made from its interners on the first call (after
    /// the panel is read). An id added to an interner after that call (none is: the
    /// interners are filled while the quotes are read) gets a label of its own.
    pub fn shared(&self) -> &SharedLabels {
        self.shared.get_or_init(|| SharedLabels {
            entities: (0..self.entities.len() as u32).map(|i| self.entities.name(i).into()).collect(),
            currencies: (0..self.currencies.len() as u32).map(|i| self.currencies.name(i).into()).collect(),
            tiers: (0..self.tiers.len() as u32)
                .map(|i| (self.tiers.seniority(i).map(Into::into), self.tiers.doc_clause(i).map(Into::into)))
                .collect(),
        })
    }

    /// The entity, currency, seniority and documentation clause of a row, as shared text.
    #[allow(clippy::type_complexity)]
    pub fn row_labels(
        &self,
        r: &CdsQuoteRow,
    ) -> (std::sync::Arc<str>, std::sync::Arc<str>, Option<std::sync::Arc<str>>, Option<std::sync::Arc<str>>) {
        let s = self.shared();
        let entity = s.entities.get(r.entity as usize).cloned().unwrap_or_else(|| self.entities.name(r.entity).into());
        let currency =
            s.currencies.get(r.currency as usize).cloned().unwrap_or_else(|| self.currencies.name(r.currency).into());
        let (seniority, doc_clause) = s.tiers.get(r.tier as usize).cloned().unwrap_or_else(|| {
            (self.tiers.seniority(r.tier).map(Into::into), self.tiers.doc_clause(r.tier).map(Into::into))
        });
        (entity, currency, seniority, doc_clause)
    }

    /// First and last quote date of the usable rows (the rows are sorted by date).
    pub fn quote_period(&self) -> Option<(chrono::NaiveDate, chrono::NaiveDate)> {
        self.period.or_else(|| Some((self.rows.first()?.date, self.rows.last()?.date)))
    }

    /// Frees the quote rows once every curve is calibrated (nothing after the calibration
    /// reads them), keeping their period.
    pub fn release_rows(&mut self) {
        self.period = self.quote_period();
        self.rows = Vec::new();
    }

    /// A row's key as the rejects table shows it: currency, tier when there is one, tenor.
    pub fn key_text(&self, r: &CdsQuoteRow) -> String {
        let tier = self.tiers.label(r.tier);
        if tier.is_empty() {
            format!("{} {}", self.currencies.name(r.currency), r.tenor)
        } else {
            format!("{} {tier} {}", self.currencies.name(r.currency), r.tenor)
        }
    }

    /// The curve of a row as messages name it: date, entity, currency and tier.
    pub fn curve_text(&self, r: &CdsQuoteRow) -> String {
        let tier = self.tiers.label(r.tier);
        let (e, c) = (self.entities.name(r.entity), self.currencies.name(r.currency));
        if tier.is_empty() {
            format!("{} {e} {c}", r.date)
        } else {
            format!("{} {e} {c} {tier}", r.date)
        }
    }

    pub fn source(&self, r: &CdsQuoteRow) -> &str {
        &self.files[r.file as usize]
    }

    pub fn reject(&self, r: &CdsQuoteRow, reason: &'static str, detail: String) -> Reject {
        Reject {
            table: TABLE,
            source: self.source(r).to_string(),
            row: r.row as u64,
            reason,
            detail,
            date: Some(r.date),
            entity: Some(self.entities.name(r.entity).to_string()),
            key: self.key_text(r),
        }
    }
}

/// Row-level limits (from the pipeline file's quality settings).
#[derive(Debug, Clone, Copy)]
pub struct CdsRowRules {
    /// A par spread above this (bp) is implausible and rejected.
    pub max_spread_bp: f64,
    /// A positive par spread below this (bp) is implausible and rejected.
    pub min_spread_bp: f64,
}

/// The labels a panel interns: entities, currencies and tiers.
#[derive(Default)]
struct Labels {
    entities: Interner,
    currencies: Interner,
    tiers: Tiers,
}

/// The rows and rejects of one run of a batch's rows, parsed on their own, with ids into the
/// run's own labels (in the order the run first meets them).
struct ParsedRun {
    rows: Vec<CdsQuoteRow>,
    rejects: Vec<Reject>,
    labels: Labels,
}

/// Rows a rayon task parses at a time, and rows a wave of tasks covers before the runs are
/// merged into the panel (a wave's parsed rows are the only copy held beside the panel's).
const RUN_ROWS: usize = 1 << 15;
const WAVE_ROWS: usize = 1 << 19;

/// Reads the quotes at `path`, applying the row rules.
///
/// Each batch is parsed in runs of rows on rayon's threads, each run with labels of its own;
/// the runs are then merged in row order, each label getting its panel id on first meeting, so
/// the ids, rows and rejects are the ones a single pass over the rows gives (a label first met
/// in an earlier run is met earlier in the file, and within a run the order is the file's).
pub fn read(path: &Path, cal: &Calendar, rules: &CdsRowRules) -> Result<CdsPanel> {
    use rayon::prelude::*;
    let mut panel = CdsPanel::default();
    let info = read_table_batches(TABLE, path, SPECS, |file| {
        let src = file.source();
        let fidx = match panel.files.iter().position(|f| *f == src) {
            Some(i) => i,
            None => {
                panel.files.push(src.clone());
                panel.files.len() - 1
            }
        } as u32;
        panel.rows.reserve(file.height);
        for wave in (0..file.height).step_by(WAVE_ROWS) {
            let wave_end = (wave + WAVE_ROWS).min(file.height);
            let starts: Vec<usize> = (wave..wave_end).step_by(RUN_ROWS).collect();
            let runs: Vec<ParsedRun> = starts
                .into_par_iter()
                .map(|from| parse_run(file, from..(from + RUN_ROWS).min(wave_end), &src, fidx, cal, rules))
                .collect();
            merge_runs(&mut panel, runs);
        }
    })?;
    panel.info = info;
    Ok(panel)
}

/// Parses the rows `range` of a batch with labels of their own.
fn parse_run(
    file: &RawFile,
    range: std::ops::Range<usize>,
    src: &str,
    fidx: u32,
    cal: &Calendar,
    rules: &CdsRowRules,
) -> ParsedRun {
    let mut run = ParsedRun { rows: Vec::with_capacity(range.len()), rejects: Vec::new(), labels: Labels::default() };
    let mut tenor_cache: super::FastMap<String, std::result::Result<Tenor, String>> = Default::default();
    for i in range {
        match parse_row(file, i, src, fidx, cal, rules, &mut run.labels, &mut tenor_cache) {
            Ok(r) => run.rows.push(r),
            Err(mut rej) => {
                rej.date = file.cell(C_DATE, i).date().ok().flatten();
                // A label refused as such is not copied into the rejects table.
                let shown =
                    |t: Option<String>| t.filter(|t| !t.chars().any(char::is_control) && t.len() <= MAX_LABEL_CHARS);
                rej.entity = shown(file.cell(C_ENTITY, i).text());
                rej.key =
                    super::source::key_text([shown(file.cell(C_CCY, i).text()), shown(file.cell(C_TENOR, i).text())]);
                run.rejects.push(rej)
            }
        }
    }
    run
}

/// Appends runs' rows and rejects to the panel, in run order: each run's labels get their
/// panel ids first (one run after the other, so ids go to labels in the order the rows first
/// meet them), then the rows are copied into the panel with those ids, runs on rayon's threads
/// (each into its own stretch of the panel's rows).
fn merge_runs(panel: &mut CdsPanel, runs: Vec<ParsedRun>) {
    use rayon::prelude::*;
    let ids = |local: &Interner, global: &mut Interner| -> Vec<u32> {
        (0..local.len() as u32).map(|i| global.id(local.name(i))).collect()
    };
    let maps: Vec<[Vec<u32>; 3]> = runs
        .iter()
        .map(|run| {
            [
                ids(&run.labels.entities, &mut panel.entities),
                ids(&run.labels.currencies, &mut panel.currencies),
                ids(&run.labels.tiers.names, &mut panel.tiers.names),
            ]
        })
        .collect();
    let total: usize = runs.iter().map(|r| r.rows.len()).sum();
    let start = panel.rows.len();
    panel.rows.reserve(total);
    let mut rest = &mut panel.rows.spare_capacity_mut()[..total];
    let mut stretches = Vec::with_capacity(runs.len());
    for run in &runs {
        let (stretch, tail) = std::mem::take(&mut rest).split_at_mut(run.rows.len());
        stretches.push(stretch);
        rest = tail;
    }
    runs.par_iter().zip(&maps).zip(stretches).for_each(|((run, [entities, currencies, tiers]), stretch)| {
        for (slot, r) in stretch.iter_mut().zip(&run.rows) {
            let mut r = *r;
            r.entity = entities[r.entity as usize];
            r.currency = currencies[r.currency as usize];
            r.tier = tiers[r.tier as usize];
            slot.write(r);
        }
    });
    // SAFETY: the `total` slots after `start` were each written above (the stretches split
    // them exactly, one per run of as many rows).
    unsafe { panel.rows.set_len(start + total) };
    for run in runs {
        panel.rejects.extend(run.rejects);
    }
}

fn reject(src: &str, row: u64, reason: &'static str, detail: String) -> Reject {
    Reject::new(TABLE, src, row, reason, detail)
}

pub(crate) fn number(
    cell: Cell<'_>,
    table: &'static str,
    column: &str,
    src: &str,
    row: u64,
) -> std::result::Result<Option<f64>, Reject> {
    match cell.number() {
        Err(()) => Err(Reject::new(
            table,
            src,
            row,
            "unparseable_number",
            format!("column {column}: {} is not a number", cell.show()),
        )),
        Ok(Some(x)) if !x.is_finite() => Err(Reject::new(
            table,
            src,
            row,
            "unparseable_number",
            format!("column {column}: {x} is not a finite number"),
        )),
        Ok(v) => Ok(v),
    }
}

pub(crate) fn required_date(
    cell: Cell<'_>,
    table: &'static str,
    column: &str,
    src: &str,
    row: u64,
) -> std::result::Result<NaiveDate, Reject> {
    match cell.date() {
        Ok(Some(d)) => Ok(d),
        Ok(None) => Err(Reject::new(table, src, row, "missing_value", format!("column {column} is empty"))),
        Err(()) => Err(Reject::new(
            table,
            src,
            row,
            "unparseable_date",
            format!("column {column}: {} is not an ISO date yyyy-mm-dd", cell.show()),
        )),
    }
}

pub(crate) fn required_text<'a>(
    cell: Cell<'a>,
    table: &'static str,
    column: &str,
    src: &str,
    row: u64,
) -> std::result::Result<Cell<'a>, Reject> {
    match cell {
        Cell::Null => Err(Reject::new(table, src, row, "missing_value", format!("column {column} is empty"))),
        Cell::Str(s) if s.trim().is_empty() => {
            Err(Reject::new(table, src, row, "missing_value", format!("column {column} is empty")))
        }
        Cell::Str(s) if s.chars().any(char::is_control) => Err(Reject::new(
            table,
            src,
            row,
            "bad_label",
            format!("column {column} holds a control character (a line break, a tab, a NUL, ...)"),
        )),
        Cell::Str(s) if s.len() > MAX_LABEL_CHARS && s.chars().count() > MAX_LABEL_CHARS => Err(Reject::new(
            table,
            src,
            row,
            "bad_label",
            format!("column {column} holds {} characters, more than {MAX_LABEL_CHARS}", s.chars().count()),
        )),
        c => Ok(c),
    }
}

/// The longest name, currency, tenor or identifier a row may carry, in characters: it is
/// written into every table and the report, where a longer one is a fault of the file.
pub const MAX_LABEL_CHARS: usize = 200;

fn text_of<'a>(c: &Cell<'a>, buf: &'a mut String) -> &'a str {
    match *c {
        Cell::Str(s) => s.trim(),
        other => {
            *buf = other.text().unwrap_or_default();
            buf.as_str()
        }
    }
}

/// An optional label: None when empty, else checked as a required one is.
fn optional_text<'a>(
    cell: Cell<'a>,
    column: &str,
    src: &str,
    row: u64,
    buf: &'a mut String,
) -> std::result::Result<Option<&'a str>, Reject> {
    match cell {
        Cell::Null => Ok(None),
        Cell::Str(s) if s.trim().is_empty() => Ok(None),
        cell => {
            let cell = required_text(cell, TABLE, column, src, row)?;
            Ok(Some(text_of(&cell, buf)))
        }
    }
}

#[allow(clippy::too_many_arguments)]
fn parse_row(
    file: &RawFile,
    i: usize,
    src: &str,
    fidx: u32,
    cal: &Calendar,
    rules: &CdsRowRules,
    panel: &mut Labels,
    tenor_cache: &mut super::FastMap<String, std::result::Result<Tenor, String>>,
) -> std::result::Result<CdsQuoteRow, Reject> {
    let row = file.file_row(i);
    let date = required_date(file.cell(C_DATE, i), TABLE, "date", src, row)?;
    let ent_cell = required_text(file.cell(C_ENTITY, i), TABLE, "entity", src, row)?;
    let ccy_cell = required_text(file.cell(C_CCY, i), TABLE, "currency", src, row)?;
    let tenor_cell = required_text(file.cell(C_TENOR, i), TABLE, "tenor", src, row)?;
    let mut b1 = String::new();
    let tenor_text = text_of(&tenor_cell, &mut b1);
    let tenor = match tenor_cache.get(tenor_text) {
        Some(t) => t.clone(),
        None => {
            let t = tenor_text.parse::<Tenor>().map_err(|e| e.to_string());
            let t = t.and_then(|t| {
                if t.months() % 3 == 0 {
                    Ok(t)
                } else {
                    Err(format!("{t} is not a whole number of quarters, as standard CDS tenors are"))
                }
            });
            tenor_cache.insert(tenor_text.to_string(), t.clone());
            t
        }
    }
    .map_err(|e| reject(src, row, "unknown_tenor", format!("column tenor: {e}")))?;
    if !cal.is_business_day(date) {
        return Err(reject(
            src,
            row,
            "non_business_day",
            format!(
                "column date: {date} is a {}",
                if Calendar::is_weekend(date) { "weekend day" } else { "listed holiday" }
            ),
        ));
    }
    let par = number(file.cell(C_SPREAD, i), TABLE, "par_spread_bp", src, row)?;
    let quoted = number(file.cell(C_QUOTED, i), TABLE, "quoted_spread_bp", src, row)?;
    let upfront = number(file.cell(C_UPFRONT, i), TABLE, "upfront", src, row)?;
    let coupon = number(file.cell(C_COUPON, i), TABLE, "coupon_bp", src, row)?;
    // The quote type: inferred from the columns given, and checked against `quote_type`.
    let inferred = match (par, quoted, upfront) {
        (Some(_), None, _) => "par_spread",
        (None, Some(_), None) => "quoted_spread",
        (None, None, Some(_)) => "upfront",
        (None, None, None) => "",
        _ => {
            return Err(reject(
                src,
                row,
                "ambiguous_quote",
                "the row gives a quoted spread beside a par spread or an upfront; give one quote".into(),
            ))
        }
    };
    if let Some(t) = file.cell(C_QUOTE_TYPE, i).text() {
        let t = t.to_ascii_lowercase();
        if !matches!(t.as_str(), "par_spread" | "quoted_spread" | "upfront") {
            return Err(reject(
                src,
                row,
                "unknown_quote_type",
                format!("column quote_type: {t:?} is not par_spread, quoted_spread or upfront"),
            ));
        }
        if !inferred.is_empty() && t != inferred {
            return Err(reject(
                src,
                row,
                "quote_type_mismatch",
                format!("column quote_type says {t}, but the row's quote columns give a {inferred} quote"),
            ));
        }
    }
    let quoted_coupon_bp = match quoted {
        Some(_) => {
            let c = coupon.unwrap_or(f64::from(STANDARD_COUPON));
            if coupon.is_some() && !(c > 0.0) {
                return Err(reject(
                    src,
                    row,
                    "negative_coupon",
                    format!("column coupon_bp: {c} bp is not a positive running coupon for a quoted spread"),
                ));
            }
            c as f32
        }
        None => f32::NAN,
    };
    let (spread, spread_column) = match quoted {
        Some(q) => (Some(q), "quoted_spread_bp"),
        None => (par, "par_spread_bp"),
    };
    let quote = match (spread, upfront, coupon) {
        (Some(s), _, _) if s <= 0.0 => {
            return Err(reject(
                src,
                row,
                "non_positive_spread",
                format!("column {spread_column}: {s} bp is not positive"),
            ))
        }
        (Some(s), _, _) if s < rules.min_spread_bp => {
            return Err(reject(
                src,
                row,
                "spread_below_floor",
                format!("column {spread_column}: {s} bp is below the plausible floor of {} bp", rules.min_spread_bp),
            ))
        }
        (Some(s), _, _) if s > rules.max_spread_bp => {
            return Err(reject(
                src,
                row,
                "spread_above_cap",
                format!("column {spread_column}: {s} bp is above the plausible cap of {} bp", rules.max_spread_bp),
            ))
        }
        (Some(s), _, _) => CdsQuote::ParSpread(s / 1e4),
        (None, Some(u), Some(c)) if c < 0.0 => {
            return Err(reject(
                src,
                row,
                "negative_coupon",
                format!("column coupon_bp: {c} bp is negative (upfront {u})"),
            ))
        }
        (None, Some(u), Some(_)) if !(u > -1.0 && u < 1.0) => {
            return Err(reject(
                src,
                row,
                "implausible_upfront",
                format!("column upfront: {u} is not a fraction of notional between -1 and 1"),
            ))
        }
        (None, Some(u), Some(c)) => CdsQuote::Upfront { upfront: u, coupon: c / 1e4 },
        (None, Some(_), None) => {
            return Err(reject(
                src,
                row,
                "missing_value",
                "column coupon_bp is empty: an upfront quote needs its running coupon".into(),
            ))
        }
        (None, None, _) => {
            return Err(reject(
                src,
                row,
                "missing_value",
                "no quote: par_spread_bp is empty and there is no upfront".into(),
            ))
        }
    };
    let recovery = number(file.cell(C_RECOVERY, i), TABLE, "recovery", src, row)?;
    if let Some(r) = recovery {
        if !(0.0..1.0).contains(&r) {
            return Err(reject(
                src,
                row,
                "implausible_recovery",
                format!("column recovery: {r} is not a fraction in [0, 1)"),
            ));
        }
    }
    let mut b2 = String::new();
    let mut b3 = String::new();
    let entity = panel.entities.id(text_of(&ent_cell, &mut b2));
    let currency = panel.currencies.id(text_of(&ccy_cell, &mut b3));
    let (mut b4, mut b5) = (String::new(), String::new());
    let seniority = optional_text(file.cell(C_SENIORITY, i), "seniority", src, row, &mut b4)?;
    let doc_clause = optional_text(file.cell(C_DOC_CLAUSE, i), "doc_clause", src, row, &mut b5)?;
    let tier = panel.tiers.id(seniority, doc_clause);
    // An explicit maturity: a contract off the standard roll of its tenor when it differs.
    let maturity = match file.cell(C_MATURITY, i).date() {
        Ok(None) => None,
        Err(()) => {
            return Err(reject(
                src,
                row,
                "unparseable_date",
                format!("column maturity: {} is not an ISO date yyyy-mm-dd", file.cell(C_MATURITY, i).show()),
            ))
        }
        Ok(Some(m)) if m <= date + chrono::Days::new(1) => {
            return Err(reject(
                src,
                row,
                "expired_maturity",
                format!("column maturity: {m} is not after the protection start {}", date + chrono::Days::new(1)),
            ))
        }
        Ok(Some(m)) if !(m.day() == 20 && m.month() % 3 == 0) => {
            return Err(reject(
                src,
                row,
                "non_imm_maturity",
                format!(
                    "column maturity: {m} is not an IMM date (20 March, June, September or December), as a standard contract's maturity is"
                ),
            ))
        }
        Ok(Some(m)) => match crate::time::imm::cds_maturity(date, tenor) {
            Ok(standard) if standard == m => None,
            _ => Some(m),
        },
    };
    Ok(CdsQuoteRow {
        date,
        entity,
        currency,
        tenor,
        quote,
        recovery: recovery.unwrap_or(f64::NAN),
        quoted_coupon_bp,
        maturity,
        tier,
        file: fidx,
        row: row as u32,
        flags: 0,
    })
}
/// A 5Y par-spread row of 100 bp on `date` for `entity` (ids 0 for the rest), data row `row`:
/// for tests that need rows and not their values.
#[cfg(test)]
pub(crate) fn plain_row(date: NaiveDate, entity: u32, row: u32) -> CdsQuoteRow {
    CdsQuoteRow {
        date,
        entity,
        currency: 0,
        tenor: Tenor::from_months(60).expect("5Y"),
        quote: CdsQuote::ParSpread(0.01),
        recovery: f64::NAN,
        tier: 0,
        file: 0,
        row,
        flags: 0,
        quoted_coupon_bp: f32::NAN,
        maturity: None,
    }
}

#[cfg(test)]
mod size_probe {
    /// The panel holds tens of millions of rows: the row stays at 72 bytes.
    #[test]
    fn a_quote_row_is_72_bytes() {
        assert_eq!(std::mem::size_of::<super::CdsQuoteRow>(), 72);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The quotes read in runs on rayon's threads are those of one pass over the rows, with the
    /// same label ids: a file of 100,000 rows (four runs) whose entities, currencies and tiers
    /// first appear in different runs and come back in others, with rejected rows spread
    /// through it (one of them interning a new entity before its maturity is refused).
    #[test]
    fn runs_parsed_apart_are_the_single_pass() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("quotes.csv");
        let mut text = String::from("date,entity,currency,tenor,par_spread_bp,seniority,doc_clause,maturity\n");
        let mut rng = crate::sim::rng::Rng::new(12345);
        let mut next = |n: u64| rng.below(n);
        let tenors = ["6M", "1Y", "3Y", "5Y", "7Y", "10Y"];
        for i in 0..100_000u64 {
            // New entities keep arriving as the file goes on; old ones come back.
            let entity = format!("Name {:05} Fictional Holdings", next(i / 50 + 1));
            let currency = ["EUR", "USD", "JPY"][next(if i < 40_000 { 2 } else { 3 }) as usize];
            let seniority = ["", "senior", "sub"][next(if i < 70_000 { 2 } else { 3 }) as usize];
            let doc = ["", "clause-a"][next(2) as usize];
            let tenor = tenors[next(6) as usize];
            let day = 2 + next(20) as u32;
            let date = NaiveDate::from_ymd_opt(2024, 1, day).unwrap();
            let date = if Calendar::is_weekend(date) { NaiveDate::from_ymd_opt(2024, 1, 3).unwrap() } else { date };
            let spread = match next(500) {
                0 => "-5".to_string(),
                1 => "abc".to_string(),
                _ => format!("{}", 20 + next(300)),
            };
            let maturity = if next(1000) == 0 { "2023-12-20" } else { "" };
            text.push_str(&format!("{date},{entity},{currency},{tenor},{spread},{seniority},{doc},{maturity}\n"));
        }
        std::fs::write(&path, text).unwrap();
        let cal = Calendar::weekends_only();
        let rules = CdsRowRules { max_spread_bp: 5000.0, min_spread_bp: 0.01 };
        let panel = read(&path, &cal, &rules).unwrap();

        // One pass over the same batch with one set of labels: the reading before runs.
        let mut single = None;
        read_table_batches(TABLE, &path, SPECS, |file| {
            single = Some(parse_run(file, 0..file.height, &file.source(), 0, &cal, &rules));
        })
        .unwrap();
        let single = single.unwrap();
        assert!(
            single.rows.len() > 99_000 && single.rejects.len() > 300,
            "{} {}",
            single.rows.len(),
            single.rejects.len()
        );
        assert!(single.labels.entities.len() > 1_500, "{}", single.labels.entities.len());
        assert_eq!(panel.rows.len(), single.rows.len());
        for (a, b) in panel.rows.iter().zip(&single.rows) {
            assert_eq!(
                (a.date, a.entity, a.currency, a.tier, a.tenor, a.row, a.file),
                (b.date, b.entity, b.currency, b.tier, b.tenor, b.row, b.file)
            );
            assert_eq!((a.recovery.to_bits(), a.maturity, a.flags), (b.recovery.to_bits(), b.maturity, b.flags));
            assert_eq!(format!("{:?}", a.quote), format!("{:?}", b.quote));
        }
        let names = |i: &Interner| (0..i.len() as u32).map(|k| i.name(k).to_string()).collect::<Vec<_>>();
        assert_eq!(names(&panel.entities), names(&single.labels.entities));
        assert_eq!(names(&panel.currencies), names(&single.labels.currencies));
        assert_eq!(names(&panel.tiers.names), names(&single.labels.tiers.names));
        let shown = |r: &[Reject]| r.iter().map(|r| format!("{r:?}")).collect::<Vec<_>>();
        assert_eq!(shown(&panel.rejects), shown(&single.rejects));
    }
}
