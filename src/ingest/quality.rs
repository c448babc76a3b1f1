//! Data-quality rules that need more than one row: duplicates, quotes after default, unit slips
//! (percent typed for basis points, or the reverse), and the non-rejecting flags (stale runs,
//! one-day spikes that revert, curves with too few tenors, inverted curves).
//!
//! Works on the panel's plain rows; every threshold comes from [`QualitySettings`] and is
//! printed in the outputs. A flag never removes a row; a reject always says why.

use super::cds::{CdsPanel, CdsQuoteRow};
use crate::text::{FlagRule, Severity};
use crate::time::serial;
use chrono::NaiveDate;
use rayon::prelude::*;

/// Thresholds of the data-quality rules (defaults are documented with each field).
#[derive(Debug, Clone, PartialEq)]
pub struct QualitySettings {
    /// Par spreads above this (bp) are rejected as implausible. Default 20,000 bp: distressed
    /// names trade on upfront well before that.
    pub max_spread_bp: f64,
    /// Par spreads below this (bp) are rejected as implausible. Default 0.1 bp (a thousandth
    /// of a percent), below any spread a traded contract is quoted at (common practice, no
    /// single source): a smaller positive number is a unit or data fault, and a hazard built
    /// on it underflows.
    pub min_spread_bp: f64,
    /// Plausible band of zero rates (decimal). Default [-0.05, 0.30].
    pub zero_rate_band: (f64, f64),
    /// Plausible band of clean bond prices (percent of face). Default [1, 250].
    pub bond_price_band: (f64, f64),
    /// A quote unchanged for this many business days in a row is flagged stale. Default 5.
    pub stale_days: usize,
    /// A daily log change whose robust z-score (median / 1.4826 MAD of the series' daily log
    /// changes) exceeds this, and that reverts the next day, is a spike. Default 8.
    pub spike_z: f64,
    /// ... and whose size exceeds this log move (default 0.25, about 28%), so that quiet
    /// series with a tiny MAD do not flag ordinary moves.
    pub spike_min_log_move: f64,
    /// Share of the jump the next day's change must undo, in the opposite direction. Default 0.5.
    pub spike_revert_share: f64,
    /// A quote this many times above or below its series' median is off-scale. Default 50:
    /// a percent/bp slip is a factor of 100, while a real blow-out before a default can reach
    /// 30 times the calm level, so the threshold sits between the two.
    pub unit_slip_ratio: f64,
    /// Off-scale quotes on at least this many consecutive observations are a unit slip and are
    /// rejected; a single one is left to the spike rule. Default 2.
    pub unit_slip_min_run: usize,
    /// A curve (date, entity, currency) with fewer usable tenors is flagged. Default 3.
    pub min_tenors: usize,
}

impl Default for QualitySettings {
    fn default() -> Self {
        QualitySettings {
            max_spread_bp: 20_000.0,
            min_spread_bp: 0.1,
            zero_rate_band: (-0.05, 0.30),
            bond_price_band: (1.0, 250.0),
            stale_days: 5,
            spike_z: 8.0,
            spike_min_log_move: 0.25,
            spike_revert_share: 0.5,
            unit_slip_ratio: 50.0,
            unit_slip_min_run: 2,
            min_tenors: 3,
        }
    }
}

/// Row flag bits.
pub const FLAG_STALE: u8 = 1;
pub const FLAG_SPIKE: u8 = 2;
pub const FLAG_FEW_TENORS: u8 = 4;
pub const FLAG_INVERTED: u8 = 8;

/// A non-rejecting finding, in the shape of the flags table.
#[derive(Debug, Clone, PartialEq)]
pub struct QualityFlag {
    /// `stale_run`, `spike`, `few_tenors` or `inverted_curve`.
    pub rule: FlagRule,
    /// `warning` or `info`.
    pub severity: Severity,
    pub table: &'static str,
    pub entity: String,
    /// What the flag is about: `USD 5Y` for a quote series, `USD curve` for a curve.
    pub series: String,
    pub date: NaiveDate,
    pub value: f64,
    pub threshold: f64,
    pub explanation: String,
    pub source: String,
    pub row: u64,
}

/// Rows marked for rejection: a bit per row, and the reason only for the (few) marked ones, so
/// a 40-million-row panel does not carry a String slot per row.
struct Drops {
    marked: Vec<bool>,
    why: std::collections::HashMap<usize, (&'static str, String)>,
}

impl Drops {
    fn new(n: usize) -> Drops {
        Drops { marked: vec![false; n], why: Default::default() }
    }
    fn set(&mut self, k: usize, reason: &'static str, detail: String) {
        self.marked[k] = true;
        self.why.insert(k, (reason, detail));
    }
    fn take(&mut self, k: usize) -> Option<(&'static str, String)> {
        if self.marked[k] {
            self.why.remove(&k)
        } else {
            None
        }
    }
}

fn drop_vec<T>(v: Vec<T>) {
    std::mem::drop(v);
}

/// Sort key of a row by (entity, currency, tier, tenor, date, file, row), packed in one
/// integer when every id fits its field ([`series_key_fits`]).
/// `day` is `serial(r.date)`, computed once per row by the caller (a day count from the
/// calendar date costs more than the rest of the key, and a sort asks for each key about 2 log2
/// n times).
fn series_key(r: &CdsQuoteRow, day: i32) -> u128 {
    ((r.entity as u128) << 100)
        | ((r.currency as u128 & 0x3FF) << 90)
        | ((r.tier as u128 & 0x3FF) << 80)
        | ((r.tenor.months() as u128 & 0x3FF) << 70)
        | ((day as u128 & 0xF_FFFF) << 50)
        | ((r.file as u128 & 0xFFFF) << 32)
        | r.row as u128
}

/// Whether [`series_key`] orders the panel's rows exactly (else the rows sort on the tuple).
fn series_key_fits(panel: &CdsPanel) -> bool {
    panel.entities.len() < 1 << 28
        && panel.currencies.len() <= 1 << 10
        && panel.tiers.len() <= 1 << 10
        && panel.files.len() <= 1 << 16
}

/// The same order as [`series_key`], as a tuple.
fn series_tuple(r: &CdsQuoteRow, day: i32) -> (u32, u32, u32, u32, i32, u32, u32) {
    (r.entity, r.currency, r.tier, r.tenor.months(), day, r.file, r.row)
}

/// The rows' indices in the order of [`series_key`] (entity, currency, tier, tenor, date,
/// file, row).
///
/// When the rows come in (file, row) order, as the reader pushes them, the indices are first
/// bucketed by entity (a stable counting sort, so each bucket stays in (file, row) order),
/// then each entity's bucket is sorted on its rest of the key, packed with the row's index in
/// 96 bits, on rayon's threads: each row is read once, instead of at every comparison of a
/// sort over the whole panel. Otherwise, the whole panel is sorted on the key. Both give the
/// one order of the key (it has no ties: file and row tell rows apart), as a unit test checks.
fn series_order(panel: &CdsPanel, rows: &[CdsQuoteRow]) -> Vec<u32> {
    let n = rows.len();
    let days: Vec<i32> = rows.par_iter().map(|r| serial(r.date)).collect();
    let in_file_order = rows.windows(2).all(|w| (w[0].file, w[0].row) < (w[1].file, w[1].row));
    let entities = panel.entities.len();
    if !(series_key_fits(panel) && in_file_order && rows.iter().all(|r| (r.entity as usize) < entities)) {
        let mut order: Vec<u32> = (0..n as u32).collect();
        if series_key_fits(panel) {
            order.par_sort_unstable_by_key(|&i| series_key(&rows[i as usize], days[i as usize]));
        } else {
            order.par_sort_unstable_by_key(|&i| series_tuple(&rows[i as usize], days[i as usize]));
        }
        return order;
    }
    // Bucket starts by entity, then the stable scatter.
    let mut start = vec![0usize; entities + 1];
    for r in rows {
        start[r.entity as usize + 1] += 1;
    }
    for e in 0..entities {
        start[e + 1] += start[e];
    }
    let mut order = vec![0u32; n];
    let mut next = start.clone();
    for (i, r) in rows.iter().enumerate() {
        let e = r.entity as usize;
        order[next[e]] = i as u32;
        next[e] += 1;
    }
    // The entity's buckets, as disjoint slices of `order`.
    let mut buckets: Vec<&mut [u32]> = Vec::with_capacity(entities);
    let mut rest: &mut [u32] = &mut order;
    for e in 0..entities {
        let (bucket, tail) = rest.split_at_mut(start[e + 1] - start[e]);
        buckets.push(bucket);
        rest = tail;
    }
    buckets.into_par_iter().for_each_init(Vec::new, |keys: &mut Vec<(u64, u32)>, bucket| {
        // `series_key`'s fields below the entity and above the file (currency, tier, tenor,
        // day: 50 bits); the index breaks ties in (file, row) order, which is index order here.
        keys.clear();
        keys.extend(bucket.iter().map(|&i| {
            let k = (series_key(&rows[i as usize], days[i as usize]) >> 50) as u64 & ((1 << 50) - 1);
            (k, i)
        }));
        keys.sort_unstable();
        for (slot, (_, i)) in bucket.iter_mut().zip(keys.iter()) {
            *slot = *i;
        }
    });
    order
}

/// Quotes on each side of a quote whose median the unit-slip rule compares it with (a run of
/// slipped quotes shorter than this leaves the median of the 2 x 10 + 1 quotes untouched).
const NEIGHBOURS: usize = 10;

fn median(v: &mut [f64]) -> f64 {
    let n = v.len();
    let mid = n / 2;
    v.select_nth_unstable_by(mid, f64::total_cmp);
    let hi = v[mid];
    if n % 2 == 1 {
        hi
    } else {
        let lo = v[..mid].iter().copied().fold(f64::NEG_INFINITY, f64::max);
        0.5 * (lo + hi)
    }
}

/// Runs the CDS rules on `panel`: rejected rows move to `panel.rejects`, kept rows are sorted
/// by (date, entity name, currency name, tenor) and get their flag bits in the returned vector
/// (parallel to `panel.rows`). `first_default[entity id]` is the entity's first default date.
pub fn check_cds(
    panel: &mut CdsPanel,
    first_default: &[Option<NaiveDate>],
    s: &QualitySettings,
) -> (Vec<u8>, Vec<QualityFlag>) {
    let rows = std::mem::take(&mut panel.rows);
    let n = rows.len();
    let order = series_order(panel, &rows);
    // Every rule before the curve rules looks at one entity's rows: the entities' runs of the
    // order are checked on rayon's threads, and what each finds is applied in run order (the
    // findings in the order one pass over the whole order pushes them).
    let checked: Vec<EntityChecks> = entity_runs(&rows, &order)
        .par_iter()
        .map(|run| entity_checks(panel, &rows, &order[run.clone()], first_default, s))
        .collect();
    let mut drop = Drops::new(n);
    let mut flags = vec![0u8; n];
    let mut findings: Vec<QualityFlag> = Vec::new();
    for c in checked {
        for (k, (reason, detail)) in c.drops.why {
            drop.set(k, reason, detail);
        }
        for (k, bits) in c.flags {
            flags[k] |= bits;
        }
        findings.extend(c.findings);
    }

    // Move rejects out and compact the kept rows in place (no second copy of the panel), then
    // sort them by (date, entity name, currency name, tier, tenor).
    let ent_rank = panel.entities.ranks();
    let ccy_rank = panel.currencies.ranks();
    let tier_rank = panel.tiers.ranks();
    let mut kept = rows;
    let mut w = 0;
    for k in 0..n {
        let mut r = kept[k];
        match drop.take(k) {
            Some((reason, detail)) => {
                let rej = panel.reject(&r, reason, detail);
                panel.rejects.push(rej);
            }
            None => {
                r.flags = flags[k];
                kept[w] = r;
                w += 1;
            }
        }
    }
    kept.truncate(w);
    drop_vec(flags);
    // The date as it compares (calendar order, the order of its day count), not its day count,
    // which costs more than the rest of the key and would be computed twice per comparison.
    kept.par_sort_unstable_by_key(|r| {
        (
            r.date,
            ent_rank[r.entity as usize],
            ccy_rank[r.currency as usize],
            tier_rank[r.tier as usize],
            r.tenor,
            r.file,
            r.row,
        )
    });

    // Curve rules per (date, entity, currency, tier).
    let mut i = 0;
    while i < kept.len() {
        let h = kept[i];
        let mut j = i + 1;
        while j < kept.len()
            && kept[j].date == h.date
            && kept[j].entity == h.entity
            && kept[j].currency == h.currency
            && kept[j].tier == h.tier
        {
            j += 1;
        }
        let count = j - i;
        // Worded only for a curve that gets a finding.
        let curve = || match panel.tiers.label(h.tier) {
            t if t.is_empty() => format!("{} curve", panel.currencies.name(h.currency)),
            t => format!("{} {t} curve", panel.currencies.name(h.currency)),
        };
        if count < s.min_tenors {
            for x in &mut kept[i..j] {
                x.flags |= FLAG_FEW_TENORS;
            }
            findings.push(QualityFlag {
                rule: FlagRule::FewTenors,
                severity: Severity::Warning,
                table: super::cds::TABLE,
                entity: panel.entities.name(h.entity).to_string(),
                series: curve(),
                date: h.date,
                value: count as f64,
                threshold: s.min_tenors as f64,
                explanation: format!(
                    "only {count} usable tenor(s) on this date, fewer than the {} asked for",
                    s.min_tenors
                ),
                source: panel.source(&h).to_string(),
                row: h.row as u64,
            });
        }
        let (short, long) = (kept[i], kept[j - 1]);
        if let (Some(a), Some(b)) = (short.spread_bp(), long.spread_bp()) {
            if count >= 2 && a > b {
                for x in &mut kept[i..j] {
                    x.flags |= FLAG_INVERTED;
                }
                findings.push(QualityFlag {
                    rule: FlagRule::InvertedCurve,
                    severity: Severity::Info,
                    table: super::cds::TABLE,
                    entity: panel.entities.name(h.entity).to_string(),
                    series: curve(),
                    date: h.date,
                    value: a / b,
                    threshold: 1.0,
                    explanation: format!("{} spread {a:.1} bp is above {} spread {b:.1} bp", short.tenor, long.tenor),
                    source: panel.source(&short).to_string(),
                    row: short.row as u64,
                });
            }
        }
        i = j;
    }
    let bits: Vec<u8> = kept.iter().map(|r| r.flags).collect();
    panel.rows = kept;
    findings.sort_by(|a, b| {
        (a.date, &a.entity, &a.series, a.rule.as_str(), a.row).cmp(&(
            b.date,
            &b.entity,
            &b.series,
            b.rule.as_str(),
            b.row,
        ))
    });
    (bits, findings)
}

/// The runs of one entity in `order` (the series order: entity ids ascending first), as
/// ranges of it; each run's end found by galloping then halving from the run's start, so that
/// only a few rows per entity are read (the order visits the rows out of their memory order),
/// about 2 log2 of the run's length, whether the panel has a few long runs or many short ones.
fn entity_runs(rows: &[CdsQuoteRow], order: &[u32]) -> Vec<std::ops::Range<usize>> {
    let mut runs = Vec::new();
    let mut i = 0;
    while i < order.len() {
        let entity = rows[order[i] as usize].entity;
        let same = |k: &u32| rows[*k as usize].entity <= entity;
        // order[i..i + step] holds the entity's rows only; double the step until it may not.
        let mut step = 1;
        while i + step < order.len() && same(&order[i + step]) {
            step *= 2;
        }
        let from = i + step / 2 + 1;
        let to = (i + step + 1).min(order.len());
        let j = from.min(to) + order[from.min(to)..to].partition_point(same);
        runs.push(i..j);
        i = j;
    }
    runs
}

/// What the rules of one entity's rows find: the rows they drop (by row index, with the rule
/// and its detail), the flag bits they set, and their findings in the order they are found.
#[derive(Default)]
struct EntityChecks {
    drops: EntityDrops,
    flags: Vec<(usize, u8)>,
    findings: Vec<QualityFlag>,
}

/// The rows one entity's rules drop.
#[derive(Default)]
struct EntityDrops {
    why: hazardline_core::hash::FastMap<usize, (&'static str, String)>,
}

impl EntityDrops {
    fn is(&self, k: usize) -> bool {
        self.why.contains_key(&k)
    }
    fn set(&mut self, k: usize, reason: &'static str, detail: String) {
        self.why.insert(k, (reason, detail));
    }
}

/// The duplicate, after-default and series rules on the rows of one entity, `order` being
/// that entity's run of the series order.
fn entity_checks(
    panel: &CdsPanel,
    rows: &[CdsQuoteRow],
    order: &[u32],
    first_default: &[Option<NaiveDate>],
    s: &QualitySettings,
) -> EntityChecks {
    let n = order.len();
    let mut out = EntityChecks::default();
    let EntityChecks { drops: drop, flags, findings } = &mut out;

    // Duplicates: adjacent in the order with the same (entity, currency, tier, tenor, date).
    let same_key = |a: &CdsQuoteRow, b: &CdsQuoteRow| {
        a.entity == b.entity && a.currency == b.currency && a.tier == b.tier && a.tenor == b.tenor && a.date == b.date
    };
    let mut i = 0;
    while i < n {
        let first = &rows[order[i] as usize];
        let mut j = i + 1;
        while j < n && same_key(first, &rows[order[j] as usize]) {
            j += 1;
        }
        if j - i > 1 {
            let conflicting = order[i + 1..j].iter().any(|&k| {
                let r = &rows[k as usize];
                r.quote != first.quote || r.recovery.to_bits() != first.recovery.to_bits()
            });
            for (m, &k) in order[i..j].iter().enumerate() {
                if conflicting {
                    drop.set(
                        k as usize,
                        "conflicting_duplicate",
                        format!("quoted {} times on this date with different values; none is used", j - i),
                    );
                } else if m > 0 {
                    drop.set(k as usize, "duplicate_row", format!("repeats {} row {}", panel.source(first), first.row));
                }
            }
        }
        i = j;
    }

    // Quotes after the entity's default.
    for &k in order {
        let (k, r) = (k as usize, &rows[k as usize]);
        if !drop.is(k) {
            if let Some(Some(d)) = first_default.get(r.entity as usize) {
                if r.date > *d {
                    drop.set(k, "after_default", format!("quote dated {} after the entity's default on {d}", r.date));
                }
            }
        }
    }

    // Series rules: per (entity, currency, tier, tenor), par-spread quotes in date order.
    let mut start = 0;
    let mut series: Vec<usize> = Vec::new();
    let mut values: Vec<f64> = Vec::new();
    let mut scratch: Vec<f64> = Vec::new();
    while start < n {
        let head = &rows[order[start] as usize];
        let mut end = start + 1;
        while end < n {
            let r = &rows[order[end] as usize];
            if r.entity != head.entity || r.currency != head.currency || r.tier != head.tier || r.tenor != head.tenor {
                break;
            }
            end += 1;
        }
        series.clear();
        values.clear();
        for &k in &order[start..end] {
            let k = k as usize;
            if !drop.is(k) {
                if let Some(v) = rows[k].spread_bp() {
                    series.push(k);
                    values.push(v);
                }
            }
        }
        series_rules(panel, rows, &series, &values, &mut scratch, drop, flags, findings, s);
        start = end;
    }
    out
}

#[allow(clippy::too_many_arguments)]
fn series_rules(
    panel: &CdsPanel,
    rows: &[CdsQuoteRow],
    series: &[usize],
    values: &[f64],
    scratch: &mut Vec<f64>,
    drop: &mut EntityDrops,
    flags: &mut Vec<(usize, u8)>,
    findings: &mut Vec<QualityFlag>,
    s: &QualitySettings,
) {
    let m = series.len();
    if m == 0 {
        return;
    }
    let name = |k: usize| -> (String, String) {
        let r = &rows[k];
        (panel.entities.name(r.entity).to_string(), panel.key_text(r))
    };
    // Unit slips against the series median, and against the quote's neighbours: a name whose
    // spreads moved a long way over the years can have a slip that is within the ratio of the
    // whole series' median but far outside it against the days around it.
    scratch.clear();
    scratch.extend_from_slice(values);
    let med = median(scratch);
    let outside = |v: f64, m: f64| v >= m * s.unit_slip_ratio || v <= m / s.unit_slip_ratio;
    let mut reference = vec![med; m];
    let off: Vec<bool> = (0..m)
        .map(|q| {
            let v = values[q];
            if outside(v, med) {
                return true;
            }
            // Only a quote well away from the series median (a factor of the ratio's square
            // root) can be off against its neighbours; the others skip the local median.
            let root = s.unit_slip_ratio.sqrt();
            if v < med * root && v > med / root {
                return false;
            }
            let (a, b) = (q.saturating_sub(NEIGHBOURS), (q + NEIGHBOURS + 1).min(m));
            scratch.clear();
            scratch.extend_from_slice(&values[a..b]);
            let local = median(scratch);
            reference[q] = local;
            outside(v, local)
        })
        .collect();
    let mut keep: Vec<usize> = Vec::with_capacity(m);
    let mut t = 0;
    while t < m {
        if off[t] {
            let mut u = t;
            while u < m && off[u] {
                u += 1;
            }
            if u - t >= s.unit_slip_min_run {
                for q in t..u {
                    let (v, r) = (values[q], reference[q]);
                    let against = if r.to_bits() == med.to_bits() {
                        "the series median"
                    } else {
                        "the median of the days around it"
                    };
                    // A quote below its reference reads "1/N times", so a slip of a factor 100
                    // downward never prints as "0.0 times".
                    let factor = if v >= r { format!("{:.1} times", v / r) } else { format!("1/{:.1} of", r / v) };
                    drop.set(
                        series[q],
                        "unit_slip",
                        format!(
                            "{v:.4} bp is {factor} {against} ({r:.2} bp), on {} consecutive quotes: percent typed for basis points, or the reverse",
                            u - t
                        ),
                    );
                }
            } else {
                keep.extend(t..u);
            }
            t = u;
        } else {
            keep.push(t);
            t += 1;
        }
    }
    if keep.len() < 2 {
        return;
    }
    // Stale runs: the same value on consecutive observations.
    let mut a = 0;
    while a < keep.len() {
        let mut b = a + 1;
        while b < keep.len() && values[keep[b]] == values[keep[a]] {
            b += 1;
        }
        let repeats = b - a - 1;
        if repeats >= s.stale_days {
            for &q in &keep[a + 1..b] {
                flags.push((series[q], FLAG_STALE));
            }
            let k0 = series[keep[a]];
            let (e, ser) = name(k0);
            findings.push(QualityFlag {
                rule: FlagRule::StaleRun,
                severity: Severity::Warning,
                table: super::cds::TABLE,
                entity: e,
                series: ser,
                date: rows[series[keep[a + 1]]].date,
                value: repeats as f64,
                threshold: s.stale_days as f64,
                explanation: format!(
                    "{:.2} bp repeated unchanged on {repeats} further quotes, {} to {}",
                    values[keep[a]],
                    rows[series[keep[a + 1]]].date,
                    rows[series[keep[b - 1]]].date
                ),
                source: panel.source(&rows[series[keep[a + 1]]]).to_string(),
                row: rows[series[keep[a + 1]]].row as u64,
            });
        }
        a = b;
    }
    // Spikes: robust z-score of daily log changes, reverting the next observation.
    let changes: Vec<f64> = keep.windows(2).map(|w| (values[w[1]] / values[w[0]]).ln()).collect();
    if changes.len() < 2 {
        return;
    }
    scratch.clear();
    scratch.extend_from_slice(&changes);
    let cmed = median(scratch);
    for x in scratch.iter_mut() {
        *x = (*x - cmed).abs();
    }
    let mad = 1.4826 * median(scratch);
    for c in 0..changes.len() - 1 {
        let (r, next) = (changes[c], changes[c + 1]);
        let z = if mad > 0.0 { (r - cmed).abs() / mad } else { f64::INFINITY };
        if z > s.spike_z
            && r.abs() > s.spike_min_log_move
            && next * r < 0.0
            && next.abs() >= s.spike_revert_share * r.abs()
        {
            let k = series[keep[c + 1]];
            flags.push((k, FLAG_SPIKE));
            let (e, ser) = name(k);
            findings.push(QualityFlag {
                rule: FlagRule::Spike,
                severity: Severity::Warning,
                table: super::cds::TABLE,
                entity: e,
                series: ser,
                date: rows[k].date,
                value: if z.is_finite() { z } else { f64::MAX },
                threshold: s.spike_z,
                explanation: format!(
                    "{:.2} bp jumps {:+.0}% from {:.2} bp and reverts {:+.0}% on the next quote (robust z {:.1})",
                    values[keep[c + 1]],
                    (r.exp() - 1.0) * 100.0,
                    values[keep[c]],
                    (next.exp() - 1.0) * 100.0,
                    z
                ),
                source: panel.source(&rows[k]).to_string(),
                row: rows[k].row as u64,
            });
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::ingest::cds::CdsQuoteRow;
    use hazardline_core::instruments::CdsQuote;
    use hazardline_core::time::Tenor;

    /// The entity runs found by galloping are those one halving over the rest of the order
    /// finds: runs of one row, of powers of two and one off them, one long run, at the start
    /// and at the end of the order.
    #[test]
    fn entity_runs_by_galloping_are_the_halved_ones() {
        let day = chrono::NaiveDate::from_ymd_opt(2024, 1, 2).unwrap();
        let row = |entity: u32| crate::ingest::cds::plain_row(day, entity, 1);
        let halved = |rows: &[CdsQuoteRow], order: &[u32]| {
            let mut runs = Vec::new();
            let mut i = 0;
            while i < order.len() {
                let entity = rows[order[i] as usize].entity;
                let j = i + order[i..].partition_point(|&k| rows[k as usize].entity <= entity);
                runs.push(i..j);
                i = j;
            }
            runs
        };
        let lengths: Vec<Vec<usize>> = vec![
            vec![],
            vec![1],
            vec![1, 1, 1],
            vec![2, 3, 4, 5, 7, 8, 9, 15, 16, 17, 1],
            vec![1000, 1, 31, 32, 33, 63, 64, 65, 2],
            vec![3, 5000],
        ];
        let mut compared = 0;
        for lens in &lengths {
            let mut rows = Vec::new();
            for (e, &n) in lens.iter().enumerate() {
                rows.extend((0..n).map(|_| row(e as u32 * 3)));
            }
            // The order visits the rows out of their memory order, entity ids ascending.
            let mut order: Vec<u32> = (0..rows.len() as u32).rev().collect();
            order.sort_by_key(|&k| rows[k as usize].entity);
            let runs = entity_runs(&rows, &order);
            assert_eq!(runs, halved(&rows, &order));
            assert_eq!(runs.iter().map(|r| r.len()).collect::<Vec<_>>(), *lens);
            compared += runs.len();
        }
        assert_eq!(compared, 26);
    }

    /// A panel of `n` rows over 37 entities, two currencies, two tiers, five tenors and dates
    /// over three years, in three files, every field drawn at random (xorshift); in the
    /// reader's (file, row) order unless `shuffled`.
    fn panel(n: usize, shuffled: bool) -> CdsPanel {
        let mut s = 0x2545_f491_4f6c_dd1du64;
        let mut next = move |m: u64| {
            s ^= s << 13;
            s ^= s >> 7;
            s ^= s << 17;
            s % m
        };
        let mut p = CdsPanel::default();
        for e in 0..37 {
            p.entities.id(&format!("Entity {e}"));
        }
        for c in ["EUR", "USD"] {
            p.currencies.id(c);
        }
        let tiers = [p.tiers.id(None, None), p.tiers.id(Some("senior"), Some("XR"))];
        p.files = vec!["a.csv".into(), "b.csv".into(), "c.csv".into()];
        let start = chrono::NaiveDate::from_ymd_opt(2019, 1, 1).unwrap();
        for i in 0..n {
            p.rows.push(CdsQuoteRow {
                date: start + chrono::Days::new(next(1100)),
                entity: next(37) as u32,
                currency: next(2) as u32,
                tenor: Tenor::from_months([6, 12, 36, 60, 120][next(5) as usize]).unwrap(),
                quote: CdsQuote::ParSpread(1e-4 * (1 + next(500)) as f64),
                recovery: f64::NAN,
                tier: tiers[next(2) as usize],
                file: (3 * i / n) as u32,
                row: (i + 1) as u32,
                flags: 0,
                quoted_coupon_bp: f32::NAN,
                maturity: None,
            });
        }
        if shuffled {
            for i in (1..n).rev() {
                p.rows.swap(i, next(i as u64 + 1) as usize);
            }
        }
        p
    }

    /// The bucketed order is the order of a sort on the whole key, rows in the reader's order
    /// (the buckets) and shuffled (the whole-panel sort), with many rows on the same series
    /// and date (duplicates, told apart by file and row).
    #[test]
    fn series_order_is_the_order_of_the_whole_key() {
        for shuffled in [false, true] {
            let p = panel(40_000, shuffled);
            let got = series_order(&p, &p.rows);
            let mut want: Vec<u32> = (0..p.rows.len() as u32).collect();
            want.sort_by_key(|&i| series_tuple(&p.rows[i as usize], serial(p.rows[i as usize].date)));
            assert_eq!(got, want, "shuffled: {shuffled}");
        }
    }

    /// The entities checked apart, their findings applied in run order, are the one pass over
    /// the whole order: the same rows dropped with the same reasons, the same flag bits, the
    /// same findings in the same order. The panel has random, constant (stale runs) and
    /// smooth-with-jumps (spikes) series, duplicates and defaults.
    #[test]
    fn entities_checked_apart_are_the_one_pass() {
        let mut p = panel(60_000, false);
        for (i, r) in p.rows.iter_mut().enumerate() {
            let day = f64::from(serial(r.date) % 1100);
            match r.entity % 3 {
                0 => r.quote = CdsQuote::ParSpread(0.01),
                1 => {
                    let jump = if i % 97 == 0 { 4.0 } else { 1.0 };
                    r.quote = CdsQuote::ParSpread(0.01 * (1.0 + day / 1100.0) * jump);
                }
                _ => {}
            }
        }
        let defaults: Vec<Option<NaiveDate>> =
            (0..37).map(|e| (e % 5 == 0).then(|| NaiveDate::from_ymd_opt(2020, 6, 1).unwrap())).collect();
        let s = QualitySettings::default();
        let order = series_order(&p, &p.rows);
        let runs = entity_runs(&p.rows, &order);
        assert_eq!(runs.len(), 37);
        let apart: Vec<EntityChecks> =
            runs.iter().map(|r| entity_checks(&p, &p.rows, &order[r.clone()], &defaults, &s)).collect();
        let whole = entity_checks(&p, &p.rows, &order, &defaults, &s);
        let bits = |flags: &mut dyn Iterator<Item = (usize, u8)>| {
            let mut v = vec![0u8; p.rows.len()];
            for (k, b) in flags {
                v[k] |= b;
            }
            v
        };
        let mut drops: Vec<(usize, (&str, String))> = apart.iter().flat_map(|c| c.drops.why.clone()).collect();
        let mut want_drops: Vec<(usize, (&str, String))> = whole.drops.why.clone().into_iter().collect();
        drops.sort();
        want_drops.sort();
        assert_eq!(drops, want_drops);
        assert_eq!(
            bits(&mut apart.iter().flat_map(|c| c.flags.iter().copied())),
            bits(&mut whole.flags.iter().copied())
        );
        let findings: Vec<&QualityFlag> = apart.iter().flat_map(|c| &c.findings).collect();
        assert_eq!(findings, whole.findings.iter().collect::<Vec<_>>());
        // Every rule had something to find.
        for reason in ["duplicate_row", "conflicting_duplicate", "after_default", "unit_slip"] {
            assert!(want_drops.iter().any(|(_, (r, _))| *r == reason), "no {reason}");
        }
        for rule in [FlagRule::StaleRun, FlagRule::Spike] {
            assert!(whole.findings.iter().any(|f| f.rule == rule), "no {rule:?}");
        }
    }
}
