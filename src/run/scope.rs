//! Cutting a dataset to one part of a run: the entities of a shard ([`keep_shard`]) and the
//! curve dates of a range, with the margin a range needs from outside it ([`keep_dates`]).
//! Ingestion and its rules ran on the whole input before (rules look across days and
//! entities), so the rows kept, and their flags, are exactly those of a single run.

use crate::config::RunConfig;
use crate::ingest::Dataset;
use crate::parts::{DateRange, DateScope, Shard};
use chrono::NaiveDate;
use std::collections::HashSet;

/// Keeps the rows of the shard's entities in the tables calibration consumes: CDS quotes by
/// entity, bonds by issuer, bond prices by their bond's issuer. Ingestion and its rules ran on
/// the whole input before (every rule looks at one entity's rows, or at the shared tables), so
/// the rows kept, and their flags, are exactly those of a single run.
pub fn keep_shard(ds: &mut Dataset, shard: Shard) {
    if shard.count == 1 {
        return;
    }
    let mut dropped: Vec<(&'static str, usize)> = Vec::new();
    if let Some(p) = &mut ds.cds {
        let before = p.rows.len();
        let own: Vec<bool> = (0..p.entities.len() as u32).map(|i| shard.owns(p.entities.name(i))).collect();
        let keep: Vec<bool> = p.rows.iter().map(|r| own[r.entity as usize]).collect();
        retain_quotes(p, &mut ds.cds_flags, &keep);
        dropped.push((crate::ingest::cds::TABLE, before - p.rows.len()));
    }
    if let Some(b) = &mut ds.bonds {
        let before = b.rows.len();
        b.rows.retain(|(r, _)| shard.owns(&r.entity));
        dropped.push((crate::ingest::tables::BONDS, before - b.rows.len()));
        let kept: HashSet<String> = b.rows.iter().map(|(r, _)| r.bond.clone()).collect();
        if let Some(q) = &mut ds.bond_quotes {
            let before = q.rows.len();
            q.rows.retain(|(r, _)| kept.contains(&r.bond));
            dropped.push((crate::ingest::tables::BOND_QUOTES, before - q.rows.len()));
        }
    }
    // The shard's own accounting: other shards' rows are out of its scope (the merge accounts
    // for the whole input).
    leave_out(&mut ds.counts, dropped);
}

/// Keeps the CDS quotes (and their flag bits) where `keep` is true, and gives back the room of
/// the others: the panel of the whole input stays allocated otherwise until the calibration
/// ends (a shrink of a large allocation is done in place by the allocator, without a copy).
fn retain_quotes(p: &mut crate::ingest::cds::CdsPanel, flags: &mut Vec<u8>, keep: &[bool]) {
    let mut it = keep.iter();
    p.rows.retain(|_| *it.next().unwrap_or(&false));
    if flags.len() == keep.len() {
        let mut it = keep.iter();
        flags.retain(|_| *it.next().unwrap_or(&false));
    }
    p.rows.shrink_to_fit();
    flags.shrink_to_fit();
}

/// Takes rows a part cut away out of its accounting (the merge accounts for the whole input).
fn leave_out(counts: &mut [crate::ingest::TableCounts], dropped: Vec<(&'static str, usize)>) {
    for (table, n) in dropped {
        for c in counts.iter_mut().filter(|c| c.table == table) {
            c.rows_in -= n;
            c.used -= n;
        }
    }
}

/// Cuts `ds` (after [`keep_shard`]) to the curve dates of `range`, and returns the
/// [`DateScope`] of the part. The CDS quotes outside the range leave the part's accounting,
/// but some stay in the panel as a margin that is calibrated and never written: those within
/// the backtest's look-back before the range (a cohort date in the range may use a curve
/// dated before it) and every quote of a CIR name (the CIR fit runs day after day from the
/// name's first curve: the free mode starts each day from the day before, the
/// fixed-kappa-sigma mode's windows count the name's days from its first). Bond quotes are
/// cut to the range (their fits look at one day).
pub fn keep_dates(ds: &mut Dataset, range: DateRange, cfg: &RunConfig, outcome_end: Option<NaiveDate>) -> DateScope {
    if range.is_all() {
        return DateScope { range, outcome_end };
    }
    let lookback = chrono::Duration::days(cfg.backtest.core.lookback_days.max(0));
    let margin_from = range
        .from
        .filter(|_| cfg.backtest.enabled)
        .map(|f| (f.checked_sub_signed(lookback).unwrap_or(NaiveDate::MIN), f));
    let mut dropped: Vec<(&'static str, usize)> = Vec::new();
    if let Some(p) = &mut ds.cds {
        let s = &cfg.intensity;
        let cir: Vec<bool> = (0..p.entities.len() as u32)
            .map(|i| s.cir && s.cir_entities.as_ref().is_none_or(|l| l.iter().any(|x| x == p.entities.name(i))))
            .collect();
        let mut outside = 0;
        let keep: Vec<bool> = p
            .rows
            .iter()
            .map(|r| {
                if range.contains(r.date) {
                    return true;
                }
                outside += 1;
                cir[r.entity as usize] || margin_from.is_some_and(|(a, b)| r.date >= a && r.date < b)
            })
            .collect();
        retain_quotes(p, &mut ds.cds_flags, &keep);
        dropped.push((crate::ingest::cds::TABLE, outside));
    }
    if let Some(q) = &mut ds.bond_quotes {
        let before = q.rows.len();
        q.rows.retain(|(r, _)| range.contains(r.date));
        dropped.push((crate::ingest::tables::BOND_QUOTES, before - q.rows.len()));
    }
    leave_out(&mut ds.counts, dropped);
    DateScope { range, outcome_end }
}
