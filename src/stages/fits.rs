//! Bond-implied hazard curves, the CDS-bond basis and the CIR intensity fit, run after the CDS
//! bootstrap on the same dataset (part of `hazardline run`).
//!
//! Reads: the dataset's bonds and bond_quotes (already checked by ingestion), and the
//! discount and CDS curves that [`calibrate_blocks`](super::calibrate::calibrate_blocks)
//! built. Produces rows for hazard_curves (source `bond`), calibration_residuals (methods
//! `bond_fit` and `cir`), cds_bond_basis and intensity_params, and rejects for bond quotes
//! that no curve could use (the bond_quotes accounting is updated and checked again).
//!
//! Bond fits are independent per (date, entity, currency) and run in parallel (rayon). A CIR
//! fit starts from the day's bootstrapped curve and from the previous day's solution, so the
//! days of one name run in order; names run in parallel. Output rows are sorted by key.

use super::calibrate::{Calibration, CalibrationParams};
use crate::calibrate::bond_fit::{cds_bond_basis, fit_bond_hazard, BondFitSettings, BondQuote};
use crate::calibrate::cir::CirFitStatus;
use crate::calibrate::cir::{
    fit_cir, fit_cir_window, start_from_curve, CirFit, CirFitError, CirFitMode, CirFitSettings, CirWindowDay,
    CirWindowFit,
};
use crate::config::IntensitySettings;
use crate::error::{Error, Result};
use crate::ingest::tables::{BondRow, Provenance, BOND_QUOTES};
use crate::ingest::{Dataset, Reject};
use crate::instruments::bond::BondTerms;
use crate::models::cir::CirParams;
use crate::parts::DateRange;
use crate::tables::{BasisRow, HazardCurveRow, IntensityParamRow, ResidualRow};
use crate::text::{CurveSource, FitMethod, RowStatus};
use chrono::NaiveDate;
use rayon::prelude::*;
use std::collections::{BTreeMap, HashMap};

/// Rows produced by the bond and CIR fits.
#[derive(Debug, Default)]
pub struct IntensityCalibration {
    /// hazard_curves rows with source `bond`.
    pub hazard: Vec<HazardCurveRow>,
    /// calibration_residuals rows: `bond_fit` first, then `cir`.
    pub residuals: Vec<ResidualRow>,
    pub basis: Vec<BasisRow>,
    pub params: Vec<IntensityParamRow>,
    /// bond_quotes rows no bond curve could use.
    pub rejects: Vec<Reject>,
    pub bond_curves: usize,
    pub cir_fits: usize,
}

/// Recovery of a bond: its seniority's, else the default.
fn bond_recovery(b: &BondRow, p: &CalibrationParams) -> f64 {
    b.seniority.as_ref().and_then(|s| p.recovery_by_seniority.get(s)).copied().unwrap_or(p.recovery)
}

struct BondGroup<'a> {
    date: NaiveDate,
    entity: &'a str,
    currency: &'a str,
    /// (bond, clean price, provenance), sorted by bond id.
    quotes: Vec<(&'a BondRow, f64, &'a Provenance)>,
}

#[derive(Default)]
struct BondOutput {
    hazard: Vec<HazardCurveRow>,
    residuals: Vec<ResidualRow>,
    basis: Vec<BasisRow>,
    rejects: Vec<Reject>,
    fitted: bool,
}

fn reject_quote(g: &BondGroup, b: &BondRow, prov: &Provenance, reason: &'static str, detail: String) -> Reject {
    let mut r = Reject::new(BOND_QUOTES, &prov.source, prov.row, reason, detail);
    r.date = Some(g.date);
    r.entity = Some(g.entity.to_string());
    r.key = b.bond.clone();
    r
}

fn fit_group(g: &BondGroup, cal: &Calibration, p: &CalibrationParams, s: &IntensitySettings) -> BondOutput {
    let mut out = BondOutput::default();
    let Some(disc) = cal.discount_curves.get(&(g.date, g.currency.to_string())) else {
        for (b, _, prov) in &g.quotes {
            out.rejects.push(reject_quote(
                g,
                b,
                prov,
                "no_discount_curve",
                format!("no usable {} discount curve on {}", g.currency, g.date),
            ));
        }
        return out;
    };
    // One recovery per curve: the first bond's (bonds sorted by id); the bonds of one name
    // normally share a seniority.
    let recovery = bond_recovery(g.quotes[0].0, p);
    let quotes: Vec<BondQuote> = g
        .quotes
        .iter()
        .map(|(b, price, _)| BondQuote {
            terms: BondTerms {
                coupon: b.coupon,
                frequency: b.frequency,
                maturity: b.maturity,
                day_count: b.day_count,
                issue_date: b.issue_date,
            },
            clean_price: *price,
            bid_ask: None,
        })
        .collect();
    let settings = BondFitSettings { recovery, convention: s.bond_convention, ..BondFitSettings::default() };
    let fit = match fit_bond_hazard(g.date, &quotes, disc, &settings) {
        Ok(f) => f,
        Err(e) => {
            for (b, _, prov) in &g.quotes {
                out.rejects.push(reject_quote(
                    g,
                    b,
                    prov,
                    "bond_curve_not_built",
                    format!("{} {} {}: {e}", g.date, g.entity, g.currency),
                ));
            }
            return out;
        }
    };
    out.fitted = true;
    for (i, e) in &fit.skipped {
        let (b, _, prov) = &g.quotes[*i];
        out.rejects.push(reject_quote(g, b, prov, "bond_not_priced", format!("bond {} on {}: {e}", b.bond, g.date)));
    }
    let status = RowStatus::from(fit.status);
    for n in &fit.nodes {
        let ids: Vec<&str> =
            g.quotes.iter().filter(|(b, _, _)| b.maturity == n.maturity).map(|(b, _, _)| b.bond.as_str()).collect();
        out.hazard.push(HazardCurveRow {
            date: g.date,
            entity: g.entity.into(),
            currency: g.currency.into(),
            seniority: None,
            doc_clause: None,
            source: CurveSource::Bond,
            tenor: if ids.is_empty() { n.maturity.to_string().into() } else { ids.join("+").into() },
            maturity: n.maturity,
            node_date: n.maturity,
            hazard: Some(n.hazard),
            survival: Some(n.survival),
            status: n.status.into(),
            recovery,
            iterations: fit.iterations as i64,
            detail: Some(format!(
                "{} form, {} convention, RMSE {:.4} price / {:.3} bp of yield",
                fit.form.as_str(),
                s.bond_convention.as_str(),
                fit.rmse_price,
                fit.rmse_yield_bp
            )),
        });
    }
    for r in &fit.bonds {
        out.residuals.push(ResidualRow {
            date: g.date,
            entity: g.entity.into(),
            currency: g.currency.into(),
            seniority: None,
            doc_clause: None,
            method: FitMethod::BondFit,
            instrument: "bond_price",
            tenor_or_bond: g.quotes[r.quote_index].0.bond.as_str().into(),
            market: r.market_clean,
            model: r.model_clean,
            residual_bp: r.residual_bp,
            status,
            conversion: None,
        });
    }
    if let Some(cds) =
        cal.cds_curves.get(&(g.date, g.entity.to_string(), g.currency.to_string())).and_then(|c| c.curve.as_ref())
    {
        let mut mats: Vec<NaiveDate> = fit.nodes.iter().map(|n| n.maturity).collect();
        mats.sort();
        mats.dedup();
        if let Ok(points) = cds_bond_basis(g.date, &fit.curve, cds, disc, &mats, recovery, p.cds_calendar(g.currency)) {
            for b in points {
                out.basis.push(BasisRow {
                    date: g.date,
                    entity: g.entity.to_string(),
                    currency: g.currency.to_string(),
                    maturity: b.maturity,
                    time: b.time,
                    bond_average_hazard: b.bond_average_hazard,
                    cds_average_hazard: b.cds_average_hazard,
                    hazard_basis_bp: b.hazard_basis_bp,
                    bond_par_spread_bp: b.bond_par_spread_bp,
                    cds_par_spread_bp: b.cds_par_spread_bp,
                    basis_bp: b.basis_bp,
                });
            }
        }
    }
    out
}

fn param_row(
    date: NaiveDate,
    entity: &str,
    currency: &str,
    mode: CirFitMode,
    r: &std::result::Result<CirFit, CirFitError>,
    window: Option<&CirWindowFit>,
) -> IntensityParamRow {
    match r {
        Ok(f) => {
            let ok = f.status != CirFitStatus::Failed;
            IntensityParamRow {
                date,
                entity: entity.to_string(),
                currency: currency.to_string(),
                mode: f.mode.as_str(),
                kappa: ok.then_some(f.kappa),
                theta: ok.then_some(f.theta),
                sigma: ok.then_some(f.sigma),
                lambda0: ok.then_some(f.lambda0),
                rmse_bp: ok.then_some(f.rmse_bp),
                feller: ok.then_some(f.feller),
                status: f.status.into(),
                iterations: f.iterations as i64,
                evaluations: f.evaluations as i64,
                detail: f.detail.clone(),
                condition_number: ok.then_some(f.condition_number).flatten(),
                window_condition_number: window.and_then(|w| w.condition_number),
                se_kappa: if ok { window.map_or(f.standard_errors[0], |w| w.kappa_se) } else { None },
                se_theta: ok.then_some(f.standard_errors[1]).flatten(),
                se_sigma: if ok { window.map_or(f.standard_errors[2], |w| w.sigma_se) } else { None },
                se_lambda0: ok.then_some(f.standard_errors[3]).flatten(),
            }
        }
        Err(e) => IntensityParamRow {
            date,
            entity: entity.to_string(),
            currency: currency.to_string(),
            mode: mode.as_str(),
            kappa: None,
            theta: None,
            sigma: None,
            lambda0: None,
            rmse_bp: None,
            feller: None,
            status: RowStatus::Failed,
            iterations: 0,
            evaluations: 0,
            detail: Some(e.to_string()),
            condition_number: None,
            window_condition_number: None,
            se_kappa: None,
            se_theta: None,
            se_sigma: None,
            se_lambda0: None,
        },
    }
}

fn cir_residuals(date: NaiveDate, entity: &str, currency: &str, f: &CirFit) -> Vec<ResidualRow> {
    if f.status == CirFitStatus::Failed {
        return Vec::new();
    }
    f.quotes
        .iter()
        .map(|q| ResidualRow {
            date,
            entity: entity.into(),
            currency: currency.into(),
            seniority: None,
            doc_clause: None,
            method: FitMethod::Cir,
            instrument: q.instrument,
            tenor_or_bond: crate::tables::tenor_label(q.tenor),
            market: q.market,
            model: q.model,
            residual_bp: q.residual_bp,
            status: f.status.into(),
            conversion: None,
        })
        .collect()
}

/// The CIR fits of one name, day after day; only the days in `range` are fitted and given
/// back, the days before them fitted too where a later day depends on them (the free mode
/// starts each day from the day before's fit; a window of the fixed-kappa-sigma mode is fitted
/// whole when one of its days is in the range).
fn fit_name(
    entity: &str,
    currency: &str,
    dates: &[NaiveDate],
    cal: &Calibration,
    p: &CalibrationParams,
    s: &IntensitySettings,
    range: DateRange,
) -> (Vec<IntensityParamRow>, Vec<ResidualRow>) {
    let settings = CirFitSettings { accrual: p.bootstrap.accrual, ..CirFitSettings::default() };
    let mut params = Vec::new();
    let mut residuals = Vec::new();
    let key = |d: NaiveDate| (d, entity.to_string(), currency.to_string());
    // Days with a discount curve (always, for a curve that was bootstrapped).
    let days: Vec<(NaiveDate, &super::calibrate::CdsCurve, &crate::curves::DiscountCurve)> = dates
        .iter()
        .filter_map(|&d| Some((d, cal.cds_curves.get(&key(d))?, cal.discount_curves.get(&(d, currency.to_string()))?)))
        .collect();
    match s.cir_mode {
        CirFitMode::Free => {
            let mut prev: Option<CirParams> = None;
            for (d, c, disc) in &days {
                if range.to.is_some_and(|t| *d > t) {
                    break;
                }
                let keep = range.contains(*d);
                let mut starts: Vec<CirParams> = c.curve.as_ref().map(start_from_curve).into_iter().collect();
                starts.extend(prev);
                let r = fit_cir(*d, &c.quotes, disc, p.cds_calendar(currency), &starts, &settings);
                if let Ok(f) = &r {
                    if f.status != CirFitStatus::Failed {
                        prev = Some(f.params());
                    }
                    if keep {
                        residuals.extend(cir_residuals(*d, entity, currency, f));
                    }
                }
                if keep {
                    params.push(param_row(*d, entity, currency, s.cir_mode, &r, None));
                }
            }
        }
        CirFitMode::FixedKappaSigma => {
            // The windows are fitted independently of one another: side by side on rayon's
            // threads, their rows put back in window order (the same rows as one after the
            // other; the fits of a few names then spread over every core).
            let blocks: Vec<&[(NaiveDate, &super::calibrate::CdsCurve, &crate::curves::DiscountCurve)]> = days
                .chunks(s.cir_window.max(1))
                .filter(|block| block.iter().any(|(d, _, _)| range.contains(*d)))
                .collect();
            let fitted: Vec<(Vec<IntensityParamRow>, Vec<ResidualRow>)> = blocks
                .par_iter()
                .map(|block| {
                    let (mut params, mut residuals) = (Vec::new(), Vec::new());
                    let window: Vec<CirWindowDay> = block
                        .iter()
                        .map(|(d, c, disc)| CirWindowDay {
                            trade_date: *d,
                            quotes: &c.quotes,
                            discount: disc,
                            start: c.curve.as_ref().map(start_from_curve),
                        })
                        .collect();
                    match fit_cir_window(&window, p.cds_calendar(currency), &settings) {
                        Ok(w) => {
                            for ((d, _, _), r) in block.iter().zip(&w.days).filter(|((d, _, _), _)| range.contains(*d))
                            {
                                if let Ok(f) = r {
                                    residuals.extend(cir_residuals(*d, entity, currency, f));
                                }
                                params.push(param_row(*d, entity, currency, s.cir_mode, r, Some(&w)));
                            }
                        }
                        Err(e) => {
                            for (d, _, _) in block.iter().filter(|(d, _, _)| range.contains(*d)) {
                                params.push(param_row(*d, entity, currency, s.cir_mode, &Err(e.clone()), None));
                            }
                        }
                    }
                    (params, residuals)
                })
                .collect();
            for (window_params, window_residuals) in fitted {
                params.extend(window_params);
                residuals.extend(window_residuals);
            }
        }
    }
    (params, residuals)
}

/// The CDS curves the fits that `s` enables will read: those of the CIR names (every name
/// when no list is given) and those of the (date, entity, currency) of a bond quote (for the
/// CDS-bond basis). [`calibrate_intensity`] asks `cal.cds_curves` for no other.
pub struct CurvesForFits {
    cir: Option<Option<FastSet<String>>>,
    /// The dates of a bond quote per entity and currency.
    bond_days: FastMap<String, FastMap<String, FastSet<NaiveDate>>>,
}

/// Asked once per calibrated curve (millions): FNV hashing, not SipHash.
use crate::hash::{FastMap, FastSet};

impl CurvesForFits {
    pub fn new(ds: &Dataset, s: &IntensitySettings) -> CurvesForFits {
        let cir = s.cir.then(|| s.cir_entities.as_ref().map(|list| list.iter().cloned().collect()));
        let mut bond_days: FastMap<String, FastMap<String, FastSet<NaiveDate>>> = FastMap::default();
        if let (true, Some(bonds), Some(bq)) = (s.bond_fit, &ds.bonds, &ds.bond_quotes) {
            let by_id: HashMap<&str, &BondRow> = bonds.rows.iter().map(|(b, _)| (b.bond.as_str(), b)).collect();
            for (q, _) in &bq.rows {
                if let Some(b) = by_id.get(q.bond.as_str()) {
                    bond_days
                        .entry(b.entity.clone())
                        .or_default()
                        .entry(b.currency.clone())
                        .or_default()
                        .insert(q.date);
                }
            }
        }
        CurvesForFits { cir, bond_days }
    }

    /// Whether a fit reads the curve of (`date`, `entity`, `currency`).
    pub fn wants(&self, date: NaiveDate, entity: &str, currency: &str) -> bool {
        let cir = match &self.cir {
            Some(None) => true,
            Some(Some(names)) => names.contains(entity),
            None => false,
        };
        cir || self.bond_days.get(entity).and_then(|c| c.get(currency)).is_some_and(|dates| dates.contains(&date))
    }
}

/// The bond-implied fit of every (date, entity, currency) with bond quotes, when enabled.
fn bond_fits(ds: &Dataset, cal: &Calibration, p: &CalibrationParams, s: &IntensitySettings) -> Vec<BondOutput> {
    let (true, Some(bonds), Some(bq)) = (s.bond_fit, &ds.bonds, &ds.bond_quotes) else {
        return Vec::new();
    };
    let by_id: HashMap<&str, &BondRow> = bonds.rows.iter().map(|(b, _)| (b.bond.as_str(), b)).collect();
    let mut groups: BTreeMap<(NaiveDate, &str, &str), Vec<(&BondRow, f64, &Provenance)>> = BTreeMap::new();
    for (q, prov) in &bq.rows {
        // Ingestion rejects quotes of unknown bonds, so every quote finds its bond.
        if let Some(b) = by_id.get(q.bond.as_str()) {
            groups.entry((q.date, b.entity.as_str(), b.currency.as_str())).or_default().push((b, q.clean_price, prov));
        }
    }
    let jobs: Vec<BondGroup> = groups
        .into_iter()
        .map(|((date, entity, currency), mut quotes)| {
            quotes.sort_by(|a, b| a.0.bond.cmp(&b.0.bond));
            BondGroup { date, entity, currency, quotes }
        })
        .collect();
    jobs.par_iter().map(|g| fit_group(g, cal, p, s)).collect()
}

/// The CIR fits of every name the settings select, name by name, when enabled.
fn cir_fits(
    cal: &Calibration,
    p: &CalibrationParams,
    s: &IntensitySettings,
    range: DateRange,
) -> Vec<(Vec<IntensityParamRow>, Vec<ResidualRow>)> {
    if !s.cir {
        return Vec::new();
    }
    let mut names: BTreeMap<(&str, &str), Vec<NaiveDate>> = BTreeMap::new();
    for (d, e, c) in cal.cds_curves.keys() {
        if s.cir_entities.as_ref().is_some_and(|list| !list.iter().any(|x| x == e)) {
            continue;
        }
        names.entry((e.as_str(), c.as_str())).or_default().push(*d);
    }
    let jobs: Vec<((&str, &str), Vec<NaiveDate>)> = names.into_iter().collect();
    jobs.par_iter().map(|((e, c), dates)| fit_name(e, c, dates, cal, p, s, range)).collect()
}

/// Runs the bond and CIR fits that `s` enables, for the days in `range` (the CIR fits read
/// `cal.cds_curves` outside it too, see `run::partition::keep_dates`). Updates `ds.counts`
/// for the bond quotes this stage rejects and checks the accounting again.
pub fn calibrate_intensity(
    ds: &mut Dataset,
    cal: &Calibration,
    p: &CalibrationParams,
    s: &IntensitySettings,
    range: DateRange,
) -> Result<IntensityCalibration> {
    let mut out = IntensityCalibration::default();
    // The bond fits and the CIR fits are independent: run side by side on rayon's threads,
    // so that the few CIR names (each a sequence of days) overlap with the many bond groups.
    let data: &Dataset = ds;
    let (bond_outputs, cir_fits) = rayon::join(|| bond_fits(data, cal, p, s), || cir_fits(cal, p, s, range));
    for o in bond_outputs {
        out.bond_curves += o.fitted as usize;
        out.hazard.extend(o.hazard);
        out.residuals.extend(o.residuals);
        out.basis.extend(o.basis);
        out.rejects.extend(o.rejects);
    }
    if s.cir {
        let mut cir_res = Vec::new();
        for (params, res) in cir_fits {
            out.cir_fits += params.iter().filter(|r| r.status != RowStatus::Failed).count();
            out.params.extend(params);
            cir_res.extend(res);
        }
        out.params.sort_by(|a, b| (a.date, &a.entity, &a.currency).cmp(&(b.date, &b.entity, &b.currency)));
        // Stable: the quotes of a curve stay in their input order.
        cir_res.sort_by(|a, b| (a.date, &a.entity, &a.currency).cmp(&(b.date, &b.entity, &b.currency)));
        out.residuals.extend(cir_res);
    }

    // Accounting of the bond quotes.
    let extra = out.rejects.len();
    if extra > 0 {
        for c in ds.counts.iter_mut().filter(|c| c.table == BOND_QUOTES) {
            c.rejected += extra;
            c.used = c.used.saturating_sub(extra);
            if c.rows_in != c.used + c.rejected {
                return Err(Error::Accounting {
                    table: c.table.to_string(),
                    after: " after the bond fit",
                    rows_in: c.rows_in,
                    used: c.used,
                    rejected: c.rejected,
                });
            }
        }
    }
    out.rejects.sort_by(|a, b| (a.table, &a.source, a.row).cmp(&(b.table, &b.source, b.row)));
    Ok(out)
}
