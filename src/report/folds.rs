//! What the report takes from the two tables with a row per quote (`hazard_curves`,
//! `calibration_residuals`), gathered a slice at a time and never held whole: [`NodeFold`] and
//! [`ResidualFold`]. A run folds the rows in on the threads that write them; `hazardline
//! report` folds the same rows read back in the same order, so both give the same report.

use super::charts;
use crate::error::Result;
use crate::stability::summary::keep_first_n;
use crate::tables::manifest::RecordedSettings;
use crate::tables::readback;
use crate::tables::{HazardCurveRow, ResidualRow};
use crate::text::{CurveSource, FitMethod, RowStatus};
use chrono::NaiveDate;
use std::collections::{BTreeMap, BTreeSet};
use std::path::Path;

/// What the report shows of `hazard_curves`, gathered a slice at a time: the CDS nodes'
/// universe, statuses and 5Y band, and the bond rows whole (one curve per entity with bonds
/// and date, far fewer than the CDS nodes).
pub(super) struct CdsNodes {
    pub(super) entities: BTreeSet<String>,
    pub(super) currencies: BTreeSet<String>,
    pub(super) dates: BTreeSet<NaiveDate>,
    /// CDS curves: each curve's rows are one run of the table (it is sorted by curve), so the
    /// runs are counted rather than the keys held (4.6 million at 2,000 names x 10 years).
    pub(super) curves: usize,
    pub(super) bad_curves: std::collections::HashSet<CurveId>,
    /// CDS curves and entities per (currency, tier as `seniority/doc_clause`, empty for none).
    pub(super) tiers: BTreeMap<(String, String), (usize, BTreeSet<String>)>,
    pub(super) status_counts: BTreeMap<&'static str, usize>,
    /// The first ten nodes not `ok`, in table order, and how many there are.
    pub(super) bad_first: Vec<HazardCurveRow>,
    pub(super) bad_nodes: usize,
    /// 5Y hazards with status `ok` per date, in % (table order within a date).
    pub(super) five_year: BTreeMap<NaiveDate, Vec<f64>>,
    pub(super) bond: Vec<HazardCurveRow>,
    /// The nodes of the entities the settings name for the figures, gathered in the same pass
    /// (table order): (date, years to node, hazard) and the 5Y history.
    pub(super) named: BTreeMap<String, (Vec<(NaiveDate, f64, f64)>, Vec<(f64, f64)>)>,
    /// The curve of the last CDS row taken.
    pub(super) last: Option<CurveId>,
    /// The tier each charted entity's nodes are taken from: its first in table order.
    named_tier: BTreeMap<String, (Option<crate::tables::Label>, Option<crate::tables::Label>)>,
    /// The curves' label sets already in `entities`, `currencies` and their tier's entities,
    /// by the labels' addresses (the rows of a run share one label per text), with their
    /// tier's key in `tiers`; each entry holds its labels, so no address is freed and reused
    /// while it stands. Emptied when it reaches [`SEEN_ENTRIES`] (labels read back slice by
    /// slice are not shared across slices).
    seen: crate::hash::FastMap<[usize; 4], (CurveLabels, (String, String))>,
    /// Whether the entity of the curve being taken is one of `named`.
    last_named: bool,
}

/// A CDS curve's labels: entity, currency, seniority, doc_clause.
type CurveLabels =
    (crate::tables::Label, crate::tables::Label, Option<crate::tables::Label>, Option<crate::tables::Label>);

/// The most entries [`CdsNodes`] keeps by address.
const SEEN_ENTRIES: usize = 1 << 16;

/// A CDS curve: (date, entity, currency, seniority, doc_clause).
pub(super) type CurveId =
    (NaiveDate, crate::tables::Label, crate::tables::Label, Option<crate::tables::Label>, Option<crate::tables::Label>);

fn same_label(a: &crate::tables::Label, b: &crate::tables::Label) -> bool {
    std::sync::Arc::ptr_eq(a, b) || a == b
}

fn same_opt(a: &Option<crate::tables::Label>, b: &Option<crate::tables::Label>) -> bool {
    match (a, b) {
        (None, None) => true,
        (Some(a), Some(b)) => same_label(a, b),
        _ => false,
    }
}

fn curve_id(h: &HazardCurveRow) -> CurveId {
    (h.date, h.entity.clone(), h.currency.clone(), h.seniority.clone(), h.doc_clause.clone())
}

/// The charted entities' nodes: term structures on the chosen dates and the 5Y history.
#[derive(Default)]
pub(super) struct ChartedNodes {
    /// (entity, date) -> (years to node, hazard), in table order.
    pub(super) term: BTreeMap<(String, NaiveDate), Vec<(f64, f64)>>,
    /// entity -> (decimal year, 5Y hazard in %), in table order.
    pub(super) five_year: BTreeMap<String, Vec<(f64, f64)>>,
}

fn is_five_year_ok(h: &HazardCurveRow) -> bool {
    &*h.tenor == "5Y" && h.hazard.is_some() && h.status == RowStatus::Ok
}

impl CdsNodes {
    /// `named`: the entities the settings chart, when they name them.
    pub(super) fn new(named: Option<&[String]>) -> CdsNodes {
        CdsNodes {
            entities: BTreeSet::new(),
            currencies: BTreeSet::new(),
            dates: BTreeSet::new(),
            curves: 0,
            bad_curves: Default::default(),
            tiers: BTreeMap::new(),
            named_tier: BTreeMap::new(),
            status_counts: BTreeMap::new(),
            bad_first: Vec::new(),
            bad_nodes: 0,
            five_year: BTreeMap::new(),
            bond: Vec::new(),
            named: named.unwrap_or_default().iter().map(|e| (e.clone(), Default::default())).collect(),
            last: None,
            seen: Default::default(),
            last_named: false,
        }
    }

    /// One pass over the table.
    pub(super) fn read(path: &Path, named: Option<&[String]>) -> Result<CdsNodes> {
        let mut out = CdsNodes::new(named);
        readback::slices::<HazardCurveRow>(path, |rows| {
            out.add(&rows);
            Ok(())
        })
        .map(|_| out)
    }

    /// Takes the next rows of the table, in table order.
    fn add(&mut self, rows: &[HazardCurveRow]) {
        for h in rows {
            if h.source != CurveSource::Cds {
                self.bond.push(h.clone());
                continue;
            }
            // A curve's nodes are consecutive rows: the sets are asked once per curve (the
            // sets' contents are the same as asking every row).
            let same_curve = self.last.as_ref().is_some_and(|(d, e, c, s, dc)| {
                *d == h.date
                    && same_label(e, &h.entity)
                    && same_label(c, &h.currency)
                    && same_opt(s, &h.seniority)
                    && same_opt(dc, &h.doc_clause)
            });
            if !same_curve {
                if self.last.as_ref().is_none_or(|l| l.0 != h.date) {
                    self.dates.insert(h.date);
                }
                self.curves += 1;
                let address = |l: &crate::tables::Label| std::sync::Arc::as_ptr(l) as *const u8 as usize;
                let key = [
                    address(&h.entity),
                    address(&h.currency),
                    h.seniority.as_ref().map_or(0, address),
                    h.doc_clause.as_ref().map_or(0, address),
                ];
                match self.seen.get(&key) {
                    // Its entity, currency and tier entity are in the sets already.
                    Some((_, tier)) => {
                        if let Some(t) = self.tiers.get_mut(tier) {
                            t.0 += 1;
                        }
                    }
                    None => {
                        if !self.entities.contains(&*h.entity) {
                            self.entities.insert(h.entity.to_string());
                        }
                        if !self.currencies.contains(&*h.currency) {
                            self.currencies.insert(h.currency.to_string());
                        }
                        let tier = (
                            h.currency.to_string(),
                            crate::ingest::cds::tier_label(h.seniority.as_deref(), h.doc_clause.as_deref()),
                        );
                        let t = self.tiers.entry(tier.clone()).or_default();
                        t.0 += 1;
                        if !t.1.contains(&*h.entity) {
                            t.1.insert(h.entity.to_string());
                        }
                        if self.seen.len() >= SEEN_ENTRIES {
                            self.seen.clear();
                        }
                        let labels = (h.entity.clone(), h.currency.clone(), h.seniority.clone(), h.doc_clause.clone());
                        self.seen.insert(key, (labels, tier));
                    }
                }
                self.last_named = self.named.contains_key(&*h.entity);
                self.last = Some(curve_id(h));
            }
            *self.status_counts.entry(h.status.as_str()).or_default() += 1;
            if is_five_year_ok(h) {
                self.five_year.entry(h.date).or_default().push(h.hazard.unwrap_or(0.0) * 100.0);
            }
            let charted_tier = self.last_named && {
                let t = self
                    .named_tier
                    .entry(h.entity.to_string())
                    .or_insert_with(|| (h.seniority.clone(), h.doc_clause.clone()));
                same_opt(&t.0, &h.seniority) && same_opt(&t.1, &h.doc_clause)
            };
            if let Some((nodes, five)) = self.named.get_mut(&*h.entity).filter(|_| charted_tier) {
                if let Some(x) = h.hazard {
                    nodes.push((h.date, crate::curves::year_time(h.date, h.node_date), x));
                }
                if is_five_year_ok(h) {
                    five.push((charts::decimal_year(h.date), h.hazard.unwrap_or(0.0) * 100.0));
                }
            }
            if h.status != RowStatus::Ok {
                self.bad_curves.insert(curve_id(h));
                self.bad_nodes += 1;
                if self.bad_first.len() < 10 {
                    self.bad_first.push(h.clone());
                }
            }
        }
    }

    /// The charted entities' nodes: from the first pass when the settings named them, else
    /// from a second pass, once the entities and the dates are known.
    pub(super) fn charted(&self, path: &Path, chosen: &[String], dates: &[NaiveDate]) -> Result<ChartedNodes> {
        let mut out = ChartedNodes::default();
        if chosen.is_empty() {
            return Ok(out);
        }
        if chosen.iter().all(|e| self.named.contains_key(e)) {
            for e in chosen.iter().collect::<BTreeSet<_>>() {
                let (nodes, five) = &self.named[e];
                for &(d, x, y) in nodes.iter().filter(|(d, _, _)| dates.contains(d)) {
                    out.term.entry((e.clone(), d)).or_default().push((x, y));
                }
                if !five.is_empty() {
                    out.five_year.insert(e.clone(), five.clone());
                }
            }
            return Ok(out);
        }
        let mut first_tier: BTreeMap<String, (Option<crate::tables::Label>, Option<crate::tables::Label>)> =
            BTreeMap::new();
        readback::slices::<HazardCurveRow>(path, |rows| {
            for h in
                rows.iter().filter(|h| h.source == CurveSource::Cds && chosen.iter().any(|e| e.as_str() == &*h.entity))
            {
                // One tier per charted name: its first in table order.
                let t = first_tier
                    .entry(h.entity.to_string())
                    .or_insert_with(|| (h.seniority.clone(), h.doc_clause.clone()));
                if !(same_opt(&t.0, &h.seniority) && same_opt(&t.1, &h.doc_clause)) {
                    continue;
                }
                if let (Some(x), true) = (h.hazard, dates.contains(&h.date)) {
                    out.term
                        .entry((h.entity.to_string(), h.date))
                        .or_default()
                        .push((crate::curves::year_time(h.date, h.node_date), x));
                }
                if is_five_year_ok(h) {
                    out.five_year
                        .entry(h.entity.to_string())
                        .or_default()
                        .push((charts::decimal_year(h.date), h.hazard.unwrap_or(0.0) * 100.0));
                }
            }
            Ok(())
        })?;
        Ok(out)
    }
}

/// Running sums of one tenor's residuals, added in table order (so the figures equal those of
/// summing the collected values).
pub(super) struct TenorSums {
    pub(super) n: usize,
    pub(super) sum: f64,
    pub(super) sum_sq: f64,
    pub(super) max_abs: f64,
}

/// What the report shows of `calibration_residuals`, gathered a slice at a time.
#[derive(Default)]
pub(super) struct Residuals {
    /// Bootstrap residuals with status `ok`, and those within the repricing tolerance.
    pub(super) ok: usize,
    pub(super) within: usize,
    /// The repricing tolerance in bp (`stability.reprice_tolerance_bp`).
    pub(super) tolerance_bp: f64,
    pub(super) by_tenor: BTreeMap<(u32, String), TenorSums>,
    /// The ten largest finite bootstrap residuals (all statuses), as a stable sort would give.
    pub(super) worst: Vec<crate::tables::ResidualRow>,
    /// log10 |residual| of every finite bootstrap residual, for the histogram.
    pub(super) logs: Vec<f64>,
    pub(super) bond: Vec<crate::tables::ResidualRow>,
    /// Per quote type of the converted bootstrap quotes: quotes, those without a quoted
    /// spread, the sum and the largest of |quoted spread - par spread| in bp.
    pub(super) quote_types: BTreeMap<&'static str, (usize, usize, f64, f64)>,
}

fn worst_first(a: &crate::tables::ResidualRow, b: &crate::tables::ResidualRow) -> std::cmp::Ordering {
    b.residual_bp.abs().total_cmp(&a.residual_bp.abs()).then(a.date.cmp(&b.date)).then(a.entity.cmp(&b.entity))
}

impl Residuals {
    pub(super) fn new(tolerance_bp: f64) -> Residuals {
        Residuals { tolerance_bp, ..Residuals::default() }
    }

    pub(super) fn read(path: &Path, tolerance_bp: f64) -> Result<Residuals> {
        let mut out = Residuals::new(tolerance_bp);
        readback::slices::<ResidualRow>(path, |rows| {
            out.add(&rows);
            Ok(())
        })?;
        Ok(out)
    }

    /// Takes the next rows of the table, in table order.
    fn add(&mut self, rows: &[crate::tables::ResidualRow]) {
        // The empty sum of the standard library (its starting value), so that running sums
        // match `Iterator::sum` over the same values bit for bit.
        let zero: f64 = std::iter::empty::<f64>().sum();
        for r in rows {
            match r.method {
                FitMethod::Bootstrap => {}
                FitMethod::BondFit => {
                    self.bond.push(r.clone());
                    continue;
                }
                FitMethod::Cir => continue,
            }
            if let Some(c) = &r.conversion {
                let e = self.quote_types.entry(c.quote_type).or_insert((0, 0, 0.0, 0.0));
                e.0 += 1;
                match c.quoted_spread_bp {
                    Some(q) => {
                        let d = (q - c.par_spread_bp).abs();
                        e.2 += d;
                        e.3 = e.3.max(d);
                    }
                    None => e.1 += 1,
                }
            }
            if r.status == RowStatus::Ok {
                self.ok += 1;
                self.within += usize::from(r.residual_bp.abs() <= self.tolerance_bp);
                let e = match self.by_tenor.iter_mut().find(|((_, t), _)| *t == *r.tenor_or_bond) {
                    Some((_, e)) => e,
                    None => {
                        let months = r.tenor_or_bond.parse::<crate::time::Tenor>().map(|t| t.months()).unwrap_or(0);
                        self.by_tenor.entry((months, r.tenor_or_bond.to_string())).or_insert(TenorSums {
                            n: 0,
                            sum: zero,
                            sum_sq: zero,
                            max_abs: 0.0,
                        })
                    }
                };
                e.n += 1;
                e.sum += r.residual_bp;
                e.sum_sq += r.residual_bp * r.residual_bp;
                e.max_abs = e.max_abs.max(r.residual_bp.abs());
            }
            if !r.residual_bp.is_finite() {
                continue;
            }
            self.logs.push(r.residual_bp.abs().max(1e-16).log10());
            if self.worst.len() < 10 || worst_first(r, &self.worst[9]).is_lt() {
                keep_first_n(&mut self.worst, r.clone(), 10, worst_first);
            }
        }
    }
}

/// What the report takes from the node and residual tables, gathered as their rows are
/// written (see [`render_with`]) instead of read back.
pub struct NodeFold(pub(super) CdsNodes);

/// See [`NodeFold`].
pub struct ResidualFold(pub(super) Residuals);

impl NodeFold {
    /// `settings`: the run's settings as the manifest records them.
    pub fn new(settings: &RecordedSettings) -> NodeFold {
        NodeFold(CdsNodes::new(settings.charted_entities.as_deref()))
    }

    pub fn add(&mut self, rows: &[HazardCurveRow]) {
        self.0.add(rows);
    }
}

impl crate::tables::parquet::RowFold<HazardCurveRow> for NodeFold {
    fn add(&mut self, rows: &[HazardCurveRow]) {
        self.0.add(rows);
    }
}

impl crate::tables::parquet::RowFold<crate::tables::ResidualRow> for ResidualFold {
    fn add(&mut self, rows: &[crate::tables::ResidualRow]) {
        self.0.add(rows);
    }
}

impl ResidualFold {
    /// `tolerance_bp`: within it a calibrated quote counts as repriced.
    pub fn new(tolerance_bp: f64) -> ResidualFold {
        ResidualFold(Residuals::new(tolerance_bp))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::sync::Arc;

    /// The counts taken with the curves' labels shared (answered by address after the first
    /// curve of each label set) are those taken with fresh labels on every row (worked out
    /// from the texts each time), past the address entries' limit: the same entities,
    /// currencies, tiers with their curves and entities, statuses and charted nodes.
    #[test]
    fn curves_counted_by_address_are_those_counted_by_text() {
        let d0 = NaiveDate::from_ymd_opt(2024, 1, 2).unwrap();
        let texts = |i: usize| {
            let e = format!("Entity {}", i % 7);
            let c = ["EUR", "USD"][(i / 7) % 2];
            let s = [None, Some("senior")][(i / 14) % 2];
            let dc = [None, Some("clause-a")][(i / 28) % 2];
            (e, c, s, dc)
        };
        let shared: Vec<CurveLabels> = (0..56)
            .map(|i| {
                let (e, c, s, dc) = texts(i);
                (Arc::from(e.as_str()), Arc::from(c), s.map(Arc::from), dc.map(Arc::from))
            })
            .collect();
        let tenors: Vec<crate::tables::Label> = ["1Y", "5Y", "10Y"].iter().map(|t| Arc::from(*t)).collect();
        let rows = |fresh: bool| -> Vec<HazardCurveRow> {
            let mut out = Vec::new();
            for k in 0..SEEN_ENTRIES + 300 {
                let i = (k * 5) % 56;
                let (e, c, s, dc) = if fresh {
                    let (e, c, s, dc) = texts(i);
                    (Arc::from(e.as_str()), Arc::from(c), s.map(Arc::from), dc.map(Arc::from))
                } else {
                    shared[i].clone()
                };
                for (j, tenor) in tenors.iter().enumerate() {
                    out.push(HazardCurveRow {
                        date: d0 + chrono::Days::new((k / 56) as u64),
                        entity: e.clone(),
                        currency: c.clone(),
                        seniority: s.clone(),
                        doc_clause: dc.clone(),
                        source: CurveSource::Cds,
                        tenor: tenor.clone(),
                        maturity: d0,
                        node_date: d0 + chrono::Days::new(365 * (j as u64 + 1)),
                        hazard: Some(0.01 * (1 + (k + j) % 9) as f64),
                        survival: Some(0.9),
                        status: if (k + j) % 13 == 0 { RowStatus::Floored } else { RowStatus::Ok },
                        recovery: 0.4,
                        iterations: 3,
                        detail: None,
                    });
                }
            }
            out
        };
        let named = ["Entity 3".to_string()];
        let take = |fresh: bool| {
            let mut n = CdsNodes::new(Some(&named));
            for piece in rows(fresh).chunks(1000) {
                n.add(piece);
            }
            n
        };
        let (by_address, by_text) = (take(false), take(true));
        assert_eq!(by_address.entities, by_text.entities);
        assert_eq!(by_address.currencies, by_text.currencies);
        assert_eq!(by_address.dates, by_text.dates);
        assert_eq!(by_address.curves, by_text.curves);
        assert_eq!(by_address.tiers, by_text.tiers);
        assert_eq!(by_address.status_counts, by_text.status_counts);
        assert_eq!(by_address.bad_nodes, by_text.bad_nodes);
        assert_eq!(by_address.bad_curves, by_text.bad_curves);
        assert_eq!(by_address.five_year, by_text.five_year);
        assert_eq!(by_address.named, by_text.named);
        assert_eq!(by_address.tiers.len(), 8);
        assert_eq!(by_address.curves, SEEN_ENTRIES + 300);
        assert!(by_address.named["Entity 3"].0.len() > 1000);
    }
}
