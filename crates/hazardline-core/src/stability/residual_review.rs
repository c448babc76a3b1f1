//! Calibration residuals across many calibrations: per curve (date, entity, method) RMSE and
//! largest |residual|; per (method, tenor) the residual distribution; the worst residuals with
//! their quotes; the share of curves that reprice within a tolerance.

use super::settings::StabilitySettings;
use super::summary::{keep_first_n, quantiles_unsorted};
use chrono::NaiveDate;
use std::collections::BTreeMap;
use std::sync::Arc;

/// One repriced quote of one calibration (a row of `calibration_residuals`).
#[derive(Debug, Clone, PartialEq)]
pub struct ResidualObservation {
    /// Calibration date.
    pub date: NaiveDate,
    /// Entity identifier (labels are shared between the rows that repeat them).
    pub entity: Arc<str>,
    /// Calibration method (`bootstrap`, `bond_fit`, `cir`, ...).
    pub method: Arc<str>,
    /// Instrument kind (`cds_par_spread`, `cds_upfront`, `bond_price`, ...).
    pub instrument: Arc<str>,
    /// Tenor or bond label.
    pub tenor: Arc<str>,
    /// Market quote, in the instrument's unit.
    pub market: f64,
    /// Model quote, in the same unit.
    pub model: f64,
    /// Model minus market, in bp.
    pub residual_bp: f64,
    /// Whether the calibration that produced the curve converged.
    pub converged: bool,
}

/// Residual summary of one calibrated curve.
#[derive(Debug, Clone, PartialEq)]
pub struct CurveResidualRow {
    /// Calibration date.
    pub date: NaiveDate,
    /// Entity identifier.
    pub entity: Arc<str>,
    /// Calibration method.
    pub method: Arc<str>,
    /// Quotes repriced.
    pub n: usize,
    /// sqrt(mean residual_bp^2).
    pub rmse_bp: f64,
    /// Largest |residual_bp|.
    pub max_abs_bp: f64,
    /// Tenor of the largest |residual_bp|.
    pub worst_tenor: Arc<str>,
    /// Every row of the curve converged.
    pub converged: bool,
    /// Converged and max_abs_bp <= the method's tolerance
    /// ([`StabilitySettings::residual_threshold_bp`]).
    pub reprices: bool,
}

/// Distribution of the residuals of one (method, tenor): quantiles by definition 7 (Hyndman
/// and Fan 1996) of the residual and of its absolute value, in bp.
#[derive(Debug, Clone, PartialEq)]
pub struct TenorResidualRow {
    /// Calibration method.
    pub method: String,
    /// Tenor or bond label.
    pub tenor: String,
    /// Residuals pooled.
    pub n: usize,
    /// 1% quantile of the residual, bp.
    pub q01: f64,
    /// 5% quantile of the residual, bp.
    pub q05: f64,
    /// 50% quantile of the residual, bp.
    pub q50: f64,
    /// 95% quantile of the residual, bp.
    pub q95: f64,
    /// 99% quantile of the residual, bp.
    pub q99: f64,
    /// 1% quantile of |residual|, bp.
    pub abs_q01: f64,
    /// 5% quantile of |residual|, bp.
    pub abs_q05: f64,
    /// 50% quantile of |residual|, bp.
    pub abs_q50: f64,
    /// 95% quantile of |residual|, bp.
    pub abs_q95: f64,
    /// 99% quantile of |residual|, bp.
    pub abs_q99: f64,
}

/// One of the largest |residuals|, with its quotes.
#[derive(Debug, Clone, PartialEq)]
pub struct WorstResidualRow {
    /// 1 for the largest |residual|.
    pub rank: usize,
    /// The residual row itself.
    pub residual: ResidualObservation,
}

/// Share of one method's curves that reprice within the tolerance.
#[derive(Debug, Clone, PartialEq)]
pub struct RepricingShare {
    /// Calibration method.
    pub method: String,
    /// Curves.
    pub curves: usize,
    /// Curves that reprice.
    pub repricing: usize,
    /// repricing / curves.
    pub share: f64,
    /// The tolerance used, bp.
    pub tolerance_bp: f64,
}

/// Everything the residual review produces.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct ResidualAnalysis {
    /// One row per (date, entity, method).
    pub curves: Vec<CurveResidualRow>,
    /// One row per (method, tenor).
    pub tenors: Vec<TenorResidualRow>,
    /// The `worst_n` largest |residuals|, largest first (ties by date, entity, method, tenor).
    pub worst: Vec<WorstResidualRow>,
    /// One row per method.
    pub repricing: Vec<RepricingShare>,
    /// Rows dropped because residual_bp was not finite.
    pub non_finite: usize,
}

/// A curve's residuals summed up as they pass, in the shape of its row: while rows come in,
/// `rmse_bp` holds the sum of squares, `max_abs_bp` the largest |residual| (a later row wins a
/// tie, as `Iterator::max_by` picks the last maximum) and `worst_tenor` its tenor (empty before
/// the first row); [`finish_row`] turns the sum into the RMSE, in place.
fn start_row(r: &ResidualObservation) -> CurveResidualRow {
    CurveResidualRow {
        date: r.date,
        entity: r.entity.clone(),
        method: r.method.clone(),
        n: 0,
        rmse_bp: -0.0,
        max_abs_bp: 0.0,
        worst_tenor: "".into(),
        converged: true,
        reprices: false,
    }
}

fn add_to_row(c: &mut CurveResidualRow, r: &ResidualObservation) {
    c.n += 1;
    c.rmse_bp += r.residual_bp * r.residual_bp;
    let a = r.residual_bp.abs();
    if c.n == 1 || a.total_cmp(&c.max_abs_bp).is_ge() {
        c.max_abs_bp = a;
        c.worst_tenor = r.tenor.clone();
    }
    c.converged &= r.converged;
}

/// Adds the sums of `later` (rows of the same curve met after those of `c`).
fn absorb_row(c: &mut CurveResidualRow, later: &mut CurveResidualRow) {
    c.n += later.n;
    c.rmse_bp += later.rmse_bp;
    if later.max_abs_bp.total_cmp(&c.max_abs_bp).is_ge() {
        c.max_abs_bp = later.max_abs_bp;
        c.worst_tenor = std::mem::replace(&mut later.worst_tenor, "".into());
    }
    c.converged &= later.converged;
}

fn finish_row(c: &mut CurveResidualRow, tolerance_bp: f64) {
    c.rmse_bp = (c.rmse_bp / c.n as f64).sqrt();
    c.reprices = c.converged && c.max_abs_bp <= tolerance_bp;
}

/// (method, tenor) of a tenor row.
type TenorKey = (Arc<str>, Arc<str>);

/// The quantiles the tenor rows show.
const TENOR_QUANTILES: [f64; 5] = [0.01, 0.05, 0.5, 0.95, 0.99];

/// `residuals` is reordered (the quantiles are selected, not sorted for).
fn tenor_row(method: &str, tenor: &str, residuals: &mut [f64]) -> TenorResidualRow {
    let n = residuals.len();
    let q = quantiles_unsorted(residuals, &TENOR_QUANTILES);
    let mut abs: Vec<f64> = residuals.iter().map(|r| r.abs()).collect();
    let a = quantiles_unsorted(&mut abs, &TENOR_QUANTILES);
    let v = |x: Option<f64>| x.unwrap_or(f64::NAN);
    TenorResidualRow {
        method: method.to_string(),
        tenor: tenor.to_string(),
        n,
        q01: v(q[0]),
        q05: v(q[1]),
        q50: v(q[2]),
        q95: v(q[3]),
        q99: v(q[4]),
        abs_q01: v(a[0]),
        abs_q05: v(a[1]),
        abs_q50: v(a[2]),
        abs_q95: v(a[3]),
        abs_q99: v(a[4]),
    }
}

/// The order of the worst residuals: largest |residual| first, ties by date, entity, method,
/// tenor, then by arrival (the first n of a stable sort).
fn worse(a: &ResidualObservation, b: &ResidualObservation) -> std::cmp::Ordering {
    b.residual_bp
        .abs()
        .total_cmp(&a.residual_bp.abs())
        .then_with(|| (a.date, &a.entity, &a.method, &a.tenor).cmp(&(b.date, &b.entity, &b.method, &b.tenor)))
}

fn repricing_shares(curves: &[CurveResidualRow], tolerance_bp: impl Fn(&str) -> f64) -> Vec<RepricingShare> {
    let mut acc: BTreeMap<&str, (usize, usize)> = BTreeMap::new();
    for c in curves {
        let e = acc.entry(&*c.method).or_default();
        e.0 += 1;
        e.1 += usize::from(c.reprices);
    }
    acc.into_iter()
        .map(|(m, (n, k))| RepricingShare {
            method: m.to_string(),
            curves: n,
            repricing: k,
            share: k as f64 / n as f64,
            tolerance_bp: tolerance_bp(m),
        })
        .collect()
}

/// The residual review taken as the rows pass, one at a time, so that no row needs to be kept:
/// per curve its sums, per (method, tenor) the residuals, the worst rows so far. A curve's rows
/// usually come together; rows of a curve met again later are added to its sums (their sum of
/// squares then adds two partial sums, which may differ from one running sum in the last bit).
pub struct ResidualReview {
    /// The repricing tolerance (bp) per method: an exact fit (the bootstrap) is held to the
    /// solver's precision, a least-squares fit (bond, CIR) to a tolerance of its own.
    settings: StabilitySettings,
    worst_n: usize,
    current: Option<CurveResidualRow>,
    curves: Vec<CurveResidualRow>,
    tenor_index: std::collections::HashMap<TenorKey, usize>,
    /// `tenor_index` by the labels' addresses (labels are shared between rows), each label
    /// held in `pinned` so that its address is not reused while it is a key.
    tenor_by_address: crate::hash::FastMap<(usize, usize), usize>,
    pinned: Vec<TenorKey>,
    by_tenor: Vec<Vec<f64>>,
    worst: Vec<ResidualObservation>,
    non_finite: usize,
}

impl ResidualReview {
    pub fn new(settings: &StabilitySettings) -> Self {
        ResidualReview {
            settings: settings.clone(),
            worst_n: settings.worst_n,
            current: None,
            curves: Vec::new(),
            tenor_index: Default::default(),
            tenor_by_address: Default::default(),
            pinned: Vec::new(),
            by_tenor: Vec::new(),
            worst: Vec::new(),
            non_finite: 0,
        }
    }

    /// Takes one row; a row with a non-finite residual is counted and otherwise left out.
    pub fn add(&mut self, r: &ResidualObservation) {
        if !r.residual_bp.is_finite() {
            self.non_finite += 1;
            return;
        }
        let same =
            self.current.as_ref().is_some_and(|c| c.date == r.date && c.entity == r.entity && c.method == r.method);
        if !same {
            self.curves.extend(self.current.take());
            self.current = Some(start_row(r));
        }
        if let Some(c) = self.current.as_mut() {
            add_to_row(c, r);
        }
        let address = (Arc::as_ptr(&r.method) as *const u8 as usize, Arc::as_ptr(&r.tenor) as *const u8 as usize);
        let slot = match self.tenor_by_address.get(&address) {
            Some(&i) => i,
            None => {
                let next = self.by_tenor.len();
                let i = *self.tenor_index.entry((r.method.clone(), r.tenor.clone())).or_insert(next);
                if i == next {
                    self.by_tenor.push(Vec::new());
                }
                self.tenor_by_address.insert(address, i);
                self.pinned.push((r.method.clone(), r.tenor.clone()));
                i
            }
        };
        self.by_tenor[slot].push(r.residual_bp);
        let n = self.worst_n;
        if n > 0 && (self.worst.len() < n || worse(r, &self.worst[n - 1]).is_lt()) {
            keep_first_n(&mut self.worst, r.clone(), n, worse);
        }
    }

    pub fn finish(mut self) -> ResidualAnalysis {
        self.curves.extend(self.current.take());
        // Stable: a curve met in several runs keeps its runs in arrival order. Usually already
        // in order (the rows come in table order), which the sort finds in one pass.
        self.curves.sort_by(|a, b| (a.date, &a.entity, &a.method).cmp(&(b.date, &b.entity, &b.method)));
        self.curves.dedup_by(|later, earlier| {
            let same = later.date == earlier.date && later.entity == earlier.entity && later.method == earlier.method;
            if same {
                absorb_row(earlier, later);
            }
            same
        });
        let settings = self.settings;
        let mut curves = self.curves;
        for c in curves.iter_mut() {
            let tol = settings.residual_threshold_bp(&c.method);
            finish_row(c, tol);
        }
        let mut tenors: Vec<(TenorKey, usize)> = self.tenor_index.into_iter().collect();
        tenors.sort();
        ResidualAnalysis {
            tenors: {
                use rayon::prelude::*;
                // Tenors in parallel; each row's values are taken (and reordered) whole.
                let mut values: Vec<Option<Vec<f64>>> = self.by_tenor.into_iter().map(Some).collect();
                let jobs: Vec<(&Arc<str>, &Arc<str>, Vec<f64>)> =
                    tenors.iter().map(|((m, t), i)| (m, t, values[*i].take().unwrap_or_default())).collect();
                jobs.into_par_iter().map(|(m, t, mut v)| tenor_row(m, t, &mut v)).collect()
            },
            worst: self
                .worst
                .into_iter()
                .enumerate()
                .map(|(i, r)| WorstResidualRow { rank: i + 1, residual: r })
                .collect(),
            repricing: repricing_shares(&curves, |m| settings.residual_threshold_bp(m)),
            curves,
            non_finite: self.non_finite,
        }
    }
}

/// Summarises residual rows; rows with a non-finite residual are dropped and counted.
pub fn review_residuals(rows: &[ResidualObservation], settings: &StabilitySettings) -> ResidualAnalysis {
    let mut review = ResidualReview::new(settings);
    for r in rows {
        review.add(r);
    }
    review.finish()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn row(day: u32, entity: &str, method: &str, tenor: &str, residual_bp: f64) -> ResidualObservation {
        ResidualObservation {
            date: NaiveDate::from_ymd_opt(2024, 3, day).unwrap(),
            entity: entity.into(),
            method: method.into(),
            instrument: "cds_par_spread".into(),
            tenor: tenor.into(),
            market: 100.0,
            model: 100.0 + residual_bp,
            residual_bp,
            converged: true,
        }
    }

    #[test]
    fn a_curve_split_over_several_runs_is_one_group() {
        // The same rows grouped and interleaved: the rows of each curve keep their relative
        // order, so the curve rows (RMSE, worst tenor with its tie rule) must be identical.
        let grouped = [
            row(4, "Birch", "cir", "1Y", 3.0),
            row(4, "Birch", "cir", "5Y", -3.0),
            row(4, "Alder", "cir", "1Y", 1.0),
            row(4, "Alder", "cir", "5Y", 2.0),
        ];
        let interleaved = [grouped[0].clone(), grouped[2].clone(), grouped[1].clone(), grouped[3].clone()];
        let s = StabilitySettings::default();
        let (a, b) = (review_residuals(&grouped, &s), review_residuals(&interleaved, &s));
        assert_eq!(a.curves, b.curves);
        assert_eq!(a.curves.len(), 2);
        // Ordered by (date, entity, method); Birch's tie of |3| keeps the later row (5Y).
        assert_eq!((&*a.curves[0].entity, &*a.curves[1].entity), ("Alder", "Birch"));
        assert_eq!(&*a.curves[1].worst_tenor, "5Y");
        assert_eq!(a.curves[1].n, 2);
    }

    #[test]
    fn curve_rmse_worst_and_share() {
        // Curve (4 Mar, Birch, cir): residuals 3, -4 -> RMSE sqrt((9 + 16) / 2) = 3.535534,
        // largest |r| 4 at 5Y. Bootstrap curves: 1e-9 (reprices) and 2e-6 (does not, tolerance 1e-6).
        let rows = [
            row(4, "Birch", "cir", "1Y", 3.0),
            row(4, "Birch", "cir", "5Y", -4.0),
            row(4, "Birch", "bootstrap", "5Y", 1e-9),
            row(5, "Birch", "bootstrap", "5Y", 2e-6),
            row(5, "Birch", "bootstrap", "1Y", f64::NAN),
        ];
        let s = StabilitySettings { worst_n: 2, ..StabilitySettings::default() };
        let r = review_residuals(&rows, &s);
        assert_eq!(r.non_finite, 1);
        let cir = r.curves.iter().find(|c| &*c.method == "cir").unwrap();
        assert!((cir.rmse_bp - 12.5f64.sqrt()).abs() < 1e-12);
        assert_eq!((cir.max_abs_bp, &*cir.worst_tenor), (4.0, "5Y"));
        let boot = r.repricing.iter().find(|m| m.method == "bootstrap").unwrap();
        assert_eq!((boot.curves, boot.repricing, boot.share), (2, 1, 0.5));
        assert_eq!(boot.tolerance_bp, 1e-6);
        // The least-squares CIR fit is held to its own tolerance (10 bp by default), not the
        // bootstrap's 1e-6 bp: its largest |r| of 4 bp reprices.
        let cir_share = r.repricing.iter().find(|m| m.method == "cir").unwrap();
        assert_eq!((cir_share.repricing, cir_share.tolerance_bp), (1, 10.0));
        assert!(cir.reprices);
        let strict = StabilitySettings { residual_flag_bp: vec![("cir".into(), 3.0)], ..s.clone() };
        assert!(!review_residuals(&rows, &strict).curves.iter().find(|c| &*c.method == "cir").unwrap().reprices);
        assert_eq!(r.worst.len(), 2);
        assert_eq!((r.worst[0].rank, r.worst[0].residual.residual_bp), (1, -4.0));
        let t = r.tenors.iter().find(|t| t.method == "bootstrap" && t.tenor == "5Y").unwrap();
        // Two values 1e-9 and 2e-6: median 1.0005e-6; 99% at position 0.99: 1e-9 + 0.99 (2e-6 - 1e-9).
        assert!((t.q50 - 1.0005e-6).abs() < 1e-15);
        assert!((t.abs_q99 - (1e-9 + 0.99 * (2e-6 - 1e-9))).abs() < 1e-15);
    }
}
