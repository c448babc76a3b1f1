//! The `calibrate` stage: CDS quotes + discount zero rates -> hazard_curves,
//! calibration_residuals and rejects (Parquet) in one output folder.
//!
//! Reads: cds_quotes (date, entity, currency, tenor, par_spread_bp | upfront + coupon_bp,
//! recovery), discount (date, currency, tenor, zero_rate). Writes: hazard_curves.parquet,
//! calibration_residuals.parquet, rejects.parquet. Every input row is either used by a curve
//! or rejected with a reason: rows in = rows used + rows rejected, per table.
//!
//! Curves are independent and run in parallel (rayon) over plain structs; polars is done
//! before the parallel section starts and only resumes to write.

use crate::calibrate::bootstrap::BootstrapPlan;
use crate::calibrate::sensitivity::{OwnedPlans, SharedPlans};
use crate::calibrate::{bootstrap, BootstrapError, BootstrapQuote, BootstrapSettings, InfeasiblePolicy};
use crate::curves::{DiscountCurve, HazardCurve};
use crate::error::{Error, Result};
use crate::hash::{FastMap, FastSet};
use crate::ingest::cds::{self, CdsPanel, CdsQuoteRow};
use crate::ingest::discount::{self, DiscountRow};
use crate::ingest::{QualitySettings, Reject};
use crate::instruments::AccrualIntegration;
use crate::instruments::CdsQuote;
use crate::tables::{tenor_label, HazardCurveRow, Label, ResidualRow};
use crate::tables::{DiscountCurveRow, SensitivityRow};
use crate::text::{CurveSource, FitMethod, RowStatus};
use crate::time::{Calendar, Tenor};
use chrono::NaiveDate;
use rayon::prelude::*;
use std::collections::BTreeMap;

/// What the calibration itself needs (shared by `calibrate` and `run`).
#[derive(Debug, Clone)]
pub struct CalibrationParams {
    /// Recovery for rows with neither a recovery nor a seniority listed below.
    pub recovery: f64,
    /// Recovery by the rows' seniority value.
    pub recovery_by_seniority: BTreeMap<String, f64>,
    pub bootstrap: BootstrapSettings,
    pub calendar: Calendar,
    /// Compounding and day count of the discount table's zero rates.
    pub zero_rates: crate::curves::ZeroRateConvention,
    /// Standard-curve conventions by currency, beside the defaults of
    /// `RateConvention::default_for`.
    pub rate_conventions: BTreeMap<String, crate::curves::rates::RateConvention>,
    /// Holiday calendars by currency for the standard curves (others use `calendar`).
    pub rate_calendars: BTreeMap<String, Calendar>,
    /// Seniorities in order of preference for the reference curve of an entity and date (see
    /// [`BlockCurve::reference`]); unlisted ones follow in name order.
    pub seniority_order: Vec<String>,
    /// Standard running coupon (bp) by currency; others take
    /// [`cds::DEFAULT_STANDARD_COUPON_BP`].
    pub standard_coupons: BTreeMap<String, f64>,
    /// The curve dates that get the sensitivity shifts.
    pub sensitivity_dates: SensitivityDates,
    /// Convert every calibrated quote to the three conventions (`ResidualRow::conversion`).
    pub quote_conversions: bool,
}

/// A contract's term: its tenor, and its maturity when off the standard roll.
type Term = (Tenor, Option<NaiveDate>);

/// Single-contract plans per (date, currency, term): the flat-hazard solves of the quoted
/// spreads.
type SinglePlans = crate::hash::FastMap<(NaiveDate, u32, Term), std::result::Result<BootstrapPlan, BootstrapError>>;

impl CalibrationParams {
    /// The calendar of `currency`'s CDS contracts (roll, coupon and step-in dates) and standard
    /// curve: its `[calendars]` file, else the run's calendar.
    pub fn cds_calendar(&self, currency: &str) -> &Calendar {
        self.rate_calendars.get(currency).unwrap_or(&self.calendar)
    }

    /// The standard running coupon (bp) of `currency`.
    pub fn standard_coupon_bp(&self, currency: &str) -> f64 {
        self.standard_coupons.get(currency).copied().unwrap_or(cds::DEFAULT_STANDARD_COUPON_BP)
    }
}

pub use crate::calibrate::sensitivity::SensitivityDates;

/// Tables and counts produced by calibrating a dataset.
#[derive(Debug, Default)]
pub struct Calibration {
    pub hazard: Vec<HazardCurveRow>,
    pub residuals: Vec<ResidualRow>,
    pub discount: Vec<DiscountCurveRow>,
    /// Rows this stage rejected (no discount curve, curve not built, bad discount curve).
    pub rejects: Vec<Reject>,
    pub curves: usize,
    pub curves_complete: usize,
    pub nodes_by_status: BTreeMap<&'static str, usize>,
    pub max_abs_residual_bp: f64,
    /// The discount curves built, per (date, currency), for the later fits.
    pub discount_curves: BTreeMap<(NaiveDate, String), DiscountCurve>,
    /// The reference curve (see [`BlockCurve::reference`]) with its quotes, per (date,
    /// entity, currency): what the entity-level stages (bond basis, CIR, backtest) use.
    pub cds_curves: BTreeMap<(NaiveDate, String, String), CdsCurve>,
}

/// One bootstrapped CDS curve as a block hands it over.
#[derive(Debug, Clone)]
pub struct BlockCurve {
    /// (date, entity, currency), the entity and currency the panel's shared labels.
    pub key: (NaiveDate, Label, Label),
    /// The curve's tier: seniority and documentation clause (the panel's labels, None when
    /// the quotes give none).
    pub seniority: Option<Label>,
    pub doc_clause: Option<Label>,
    /// Whether this is the entity's reference curve on the date in its currency: of the tiers
    /// quoted that day, the one whose seniority comes first in `seniority_order` (unlisted
    /// seniorities after the listed ones, in name order, an absent seniority first), then by
    /// documentation clause in name order. One tier per (date, entity, currency) is.
    pub reference: bool,
    pub curve: CdsCurve,
}

/// A bootstrapped CDS curve as the bond and CIR fits use it.
#[derive(Debug, Clone)]
pub struct CdsCurve {
    /// The quotes the curve was bootstrapped from, in panel order.
    pub quotes: Vec<BootstrapQuote>,
    /// The curve, when every node is usable and the fail policy did not stop it.
    pub curve: Option<HazardCurve>,
}

/// A curve's result, kept in key order.
struct CurveOutput {
    hazard: Vec<HazardCurveRow>,
    residuals: Vec<ResidualRow>,
    rejects: Vec<Reject>,
    used: usize,
    fit: Option<BlockCurve>,
    sensitivities: Vec<SensitivityRow>,
}

impl CurveOutput {
    /// A curve not built: its rows rejected, nothing else.
    fn rejected(rejects: Vec<Reject>) -> CurveOutput {
        CurveOutput {
            hazard: Vec::new(),
            residuals: Vec::new(),
            rejects,
            used: 0,
            fit: None,
            sensitivities: Vec::new(),
        }
    }
}

/// Builds discount curves per (date, currency); the rows of a curve that cannot be built are
/// rejected.
fn discount_curves(
    rows: Vec<DiscountRow>,
    convention: crate::curves::ZeroRateConvention,
    rejects: &mut Vec<Reject>,
) -> (BTreeMap<(NaiveDate, String), DiscountCurve>, usize) {
    let mut groups: BTreeMap<(NaiveDate, String), Vec<DiscountRow>> = BTreeMap::new();
    for r in rows {
        groups.entry((r.date, r.currency.clone())).or_default().push(r);
    }
    let reject = |r: &DiscountRow, reason: &'static str, detail: String| {
        let mut rej = Reject::new(discount::TABLE, &r.source, r.row, reason, detail);
        rej.date = Some(r.date);
        rej.key = format!("{} {}", r.currency, r.pillar);
        rej
    };
    let mut out = BTreeMap::new();
    let mut used = 0;
    for (key, rows) in groups {
        // Each pillar's ln DF; a zero rate that gives no positive discount factor in the
        // run's convention rejects its row (the curve is built from the others).
        let mut kept: Vec<DiscountRow> = Vec::with_capacity(rows.len());
        let mut pillars: Vec<(NaiveDate, f64)> = Vec::with_capacity(rows.len());
        for r in rows {
            let log_df = match r.value {
                discount::PillarValue::DiscountFactor(f) => Some(f.ln()),
                discount::PillarValue::ZeroRate(z) => crate::curves::log_df_from_zero_rate(
                    r.date,
                    r.pillar_date,
                    z,
                    convention.compounding,
                    convention.day_count,
                ),
            };
            match log_df {
                Some(l) => {
                    pillars.push((r.pillar_date, l));
                    kept.push(r);
                }
                None => rejects.push(reject(
                    &r,
                    "no_discount_factor",
                    format!(
                        "zero rate {:?} compounded {} ({}) gives no positive discount factor to {}",
                        r.value,
                        convention.compounding.as_str(),
                        convention.day_count.as_str(),
                        r.pillar_date
                    ),
                )),
            }
        }
        if kept.is_empty() {
            continue;
        }
        match DiscountCurve::from_log_discount_factors(key.0, &pillars) {
            Ok(c) => {
                used += kept.len();
                out.insert(key, c);
            }
            Err(e) => {
                for r in kept {
                    rejects.push(reject(&r, "bad_discount_curve", e.to_string()));
                }
            }
        }
    }
    (out, used)
}

/// Builds the standard curve of each (date, currency) of the rate quotes that `curves` (from
/// the discount table) does not hold, and adds it; returns the rows used. Rows of a curve the
/// discount table gives, of a currency without a convention, or of a curve that cannot be
/// built are rejected with the reason.
fn rate_curves(
    rows: Vec<crate::ingest::rates::RateQuoteRow>,
    p: &CalibrationParams,
    curves: &mut BTreeMap<(NaiveDate, String), DiscountCurve>,
    rejects: &mut Vec<Reject>,
) -> usize {
    use crate::curves::rates::{build_rate_curve, RateConvention, RateQuote};
    use crate::ingest::rates::{RateQuoteRow, TABLE};
    let mut groups: BTreeMap<(NaiveDate, String), Vec<RateQuoteRow>> = BTreeMap::new();
    for r in rows {
        groups.entry((r.date, r.currency.clone())).or_default().push(r);
    }
    let reject_all = |rows: &[RateQuoteRow], reason: &'static str, detail: &str, rejects: &mut Vec<Reject>| {
        for r in rows {
            let mut rej = Reject::new(TABLE, &r.source, r.row, reason, detail.to_string());
            rej.date = Some(r.date);
            rej.key = format!("{} {} {}", r.currency, r.instrument.as_str(), r.tenor);
            rejects.push(rej);
        }
    };
    let mut used = 0;
    // The rows' checks first, in key order; the curves then build in parallel (each is solved
    // pillar by pillar on its own), and go in (or reject their rows) in key order again.
    let mut buildable: Vec<((NaiveDate, String), Vec<RateQuoteRow>, RateConvention)> = Vec::new();
    for (key, rows) in groups {
        if curves.contains_key(&key) {
            reject_all(
                &rows,
                "curve_in_discount_table",
                &format!("the discount table gives the {} curve of {}; it is used instead", key.1, key.0),
                rejects,
            );
            continue;
        }
        let Some(conv) = p.rate_conventions.get(&key.1).copied().or_else(|| RateConvention::default_for(&key.1)) else {
            reject_all(
                &rows,
                "no_rate_convention",
                &format!("no standard-curve convention for {} (give one under [rate_conventions.{}])", key.1, key.1),
                rejects,
            );
            continue;
        };
        buildable.push((key, rows, conv));
    }
    let built: Vec<_> = buildable
        .par_iter()
        .map(|(key, rows, conv)| {
            let quotes: Vec<RateQuote> =
                rows.iter().map(|r| RateQuote { instrument: r.instrument, tenor: r.tenor, rate: r.rate }).collect();
            let cal = p.rate_calendars.get(&key.1).unwrap_or(&p.calendar);
            build_rate_curve(key.0, &quotes, conv, cal)
        })
        .collect();
    for ((key, rows, _), b) in buildable.into_iter().zip(built) {
        match b {
            Ok((c, _)) => {
                used += rows.len();
                curves.insert(key, c);
            }
            Err(e) => reject_all(&rows, "bad_rate_curve", &e.to_string(), rejects),
        }
    }
    used
}

fn recovery_of(panel: &CdsPanel, r: &CdsQuoteRow, p: &CalibrationParams) -> f64 {
    r.recovery().unwrap_or_else(|| {
        if let Some(v) = panel.tiers.seniority(r.tier).and_then(|s| p.recovery_by_seniority.get(s)) {
            return *v;
        }
        p.recovery
    })
}

fn calibrate_one(
    panel: &CdsPanel,
    rows: &[CdsQuoteRow],
    curve: &DiscountCurve,
    plan: Option<&std::result::Result<BootstrapPlan, BootstrapError>>,
    s: &CalibrationParams,
    reference: Option<bool>,
    single: Option<&SinglePlans>,
    shift_plans: Option<&OwnedPlans>,
) -> CurveOutput {
    let h = rows[0];
    let (date, currency) = (h.date, panel.currencies.name(h.currency));
    // A quoted spread trades as the upfront its flat hazard gives at its running coupon: the
    // conversion needs the day's discount curve, so it happens here.
    let mut unconverted: Option<String> = None;
    let quotes: Vec<BootstrapQuote> = rows
        .iter()
        .map(|r| {
            let recovery = recovery_of(panel, r, s);
            let quote = match r.quote {
                CdsQuote::ParSpread(spread) if r.is_quoted_spread() => {
                    let coupon = if r.quoted_coupon_bp == cds::STANDARD_COUPON {
                        s.standard_coupon_bp(currency) / 1e4
                    } else {
                        f64::from(r.quoted_coupon_bp) / 1e4
                    };
                    let term = BootstrapQuote { tenor: r.tenor, quote: r.quote, recovery, maturity: r.maturity };
                    let cal = s.cds_calendar(currency);
                    match term.quoted_spread_as_upfront(date, spread, coupon, curve, cal, s.bootstrap.accrual) {
                        Ok(upfront) => upfront,
                        Err(why) => {
                            unconverted.get_or_insert(why);
                            r.quote
                        }
                    }
                }
                q => q,
            };
            BootstrapQuote { tenor: r.tenor, quote, recovery, maturity: r.maturity }
        })
        .collect();
    if let Some(why) = unconverted {
        let curve_text = panel.curve_text(&h);
        let rejects = rows.iter().map(|r| panel.reject(r, "curve_not_built", format!("{curve_text}: {why}"))).collect();
        return CurveOutput::rejected(rejects);
    }
    // The shared plan of this (date, currency, tenor set) when there is one; the plain
    // bootstrap otherwise (same numbers, the plan built for this curve alone).
    let fitted = match plan {
        Some(Ok(p)) => p.solve(&quotes, &s.bootstrap),
        Some(Err(e)) => Err(e.clone()),
        None => bootstrap(date, &quotes, curve, s.cds_calendar(currency), &s.bootstrap),
    };
    let mut fit = match fitted {
        Ok(f) => f,
        Err(e) => {
            let rejects = rows
                .iter()
                .map(|r| panel.reject(r, "curve_not_built", format!("{}: {e}", panel.curve_text(&h))))
                .collect();
            return CurveOutput::rejected(rejects);
        }
    };
    let shared = match plan {
        Some(Ok(p)) => Some(p),
        _ => None,
    };
    let residuals = crate::calibrate::residuals::reprice_with_plan(&fit, &quotes, curve, s.bootstrap.accrual, shared);
    let (entity_label, currency_label, seniority, doc_clause): (Label, Label, Option<Label>, Option<Label>) =
        panel.row_labels(&h);
    let hazard = fit
        .nodes
        .iter()
        .map(|n| HazardCurveRow {
            date,
            entity: entity_label.clone(),
            currency: currency_label.clone(),
            seniority: seniority.clone(),
            doc_clause: doc_clause.clone(),
            source: CurveSource::Cds,
            tenor: tenor_label(n.tenor),
            maturity: n.maturity,
            node_date: n.node_date,
            hazard: n.hazard,
            survival: n.survival,
            status: n.status.into(),
            recovery: quotes[n.quote_index].recovery,
            iterations: n.iterations as i64,
            detail: n.detail.clone(),
        })
        .collect();
    let coupon_bp = s.standard_coupon_bp(currency);
    let convert = |q: &crate::calibrate::residuals::QuoteResidual| -> Option<crate::tables::QuoteConversion> {
        let single = single?;
        let coupon = coupon_bp / 1e4;
        let upfront = q.upfront_at(coupon);
        let recovery = quotes[q.quote_index].recovery;
        let quoted_spread_bp = single
            .get(&(date, h.currency, (q.tenor, quotes[q.quote_index].maturity)))
            .and_then(|p| p.as_ref().ok())
            .and_then(|plan| {
                let flat = BootstrapQuote {
                    tenor: q.tenor,
                    quote: CdsQuote::Upfront { upfront, coupon },
                    recovery,
                    maturity: quotes[q.quote_index].maturity,
                };
                // The flat curve (fail policy) that reprices the upfront, and its par spread.
                Some(plan.flat_par_spread(&flat, &s.bootstrap)? * 1e4)
            });
        Some(crate::tables::QuoteConversion {
            quote_type: rows[q.quote_index].quote_type(),
            standard_coupon_bp: coupon_bp,
            par_spread_bp: q.model_par_spread_bp,
            standard_upfront: upfront,
            quoted_spread_bp,
        })
    };
    let residuals = residuals
        .into_iter()
        .map(|q| ResidualRow {
            conversion: convert(&q),
            date,
            entity: entity_label.clone(),
            currency: currency_label.clone(),
            seniority: seniority.clone(),
            doc_clause: doc_clause.clone(),
            method: FitMethod::Bootstrap,
            instrument: q.instrument,
            tenor_or_bond: tenor_label(q.tenor),
            market: q.market,
            model: q.model,
            residual_bp: q.residual_bp,
            status: fit
                .nodes
                .iter()
                .find(|n| n.quote_index == q.quote_index)
                .map_or(RowStatus::Ok, |n| n.status.into()),
        })
        .collect();
    let sensitivities = if s.sensitivity_dates.contains(date, &s.calendar) {
        let shared = shift_plans.map(|o| o.shared(plan)).unwrap_or_default();
        sensitivity_rows(panel, &h, &quotes, curve, s, shared)
    } else {
        Vec::new()
    };
    // The curve with its quotes, for the stages after the calibration; `reference` None:
    // nothing after it wants the curves. The fit is not read after this, so its curve moves
    // here rather than being copied.
    let fit = reference.map(|reference| {
        let curve = if fit.complete() && !fit.failed { fit.curve.take() } else { None };
        BlockCurve {
            key: (date, entity_label, currency_label),
            seniority,
            doc_clause,
            reference,
            curve: CdsCurve { quotes, curve },
        }
    });
    CurveOutput { hazard, residuals, rejects: Vec::new(), sensitivities, used: rows.len(), fit }
}

/// The rows of `sensitivities` for one curve: every shift of `calibrate::sensitivity`, with
/// its change from the base row.
fn sensitivity_rows(
    panel: &CdsPanel,
    h: &CdsQuoteRow,
    quotes: &[BootstrapQuote],
    discount: &DiscountCurve,
    s: &CalibrationParams,
    plans: SharedPlans<'_>,
) -> Vec<SensitivityRow> {
    use crate::calibrate::sensitivity::{curve_sensitivities, CurveInputs};
    let currency = panel.currencies.name(h.currency);
    let coupon_bp = s.standard_coupon_bp(currency);
    let results = curve_sensitivities(&CurveInputs {
        trade_date: h.date,
        quotes,
        discount,
        calendar: s.cds_calendar(currency),
        settings: &s.bootstrap,
        coupon: coupon_bp / 1e4,
        plans,
    });
    let base = results.first().and_then(|r| r.measures);
    let change = |m: Option<f64>, b: Option<f64>| m.zip(b).map(|(m, b)| m - b);
    results
        .into_iter()
        .map(|r| {
            let m = r.measures;
            SensitivityRow {
                date: h.date,
                entity: panel.entities.name(h.entity).to_string(),
                currency: currency.to_string(),
                seniority: panel.tiers.seniority(h.tier).map(str::to_string),
                doc_clause: panel.tiers.doc_clause(h.tier).map(str::to_string),
                grade: None,
                shift: r.shift,
                status: r.status.to_string(),
                coupon_bp,
                pd_1y: m.map(|m| m.pd_1y),
                hazard_5y: m.map(|m| m.hazard_5y),
                upfront_5y: m.map(|m| m.upfront_5y),
                pd_1y_change: change(m.map(|m| m.pd_1y), base.map(|b| b.pd_1y)),
                hazard_5y_change: change(m.map(|m| m.hazard_5y), base.map(|b| b.hazard_5y)),
                upfront_5y_change: change(m.map(|m| m.upfront_5y), base.map(|b| b.upfront_5y)),
                floored_nodes: r.floored_nodes as i64,
            }
        })
        .collect()
}

/// Whether each job (a curve's rows, by its first row) is its entity's reference curve on its
/// date in its currency (see [`BlockCurve::reference`]).
fn reference_jobs(panel: &CdsPanel, rows: &[CdsQuoteRow], jobs: &[(usize, usize)], order: &[String]) -> Vec<bool> {
    let tier_rank = panel.tiers.ranks();
    let rank = |a: usize| {
        let t = rows[a].tier;
        let listed = panel.tiers.seniority(t).and_then(|s| order.iter().position(|o| o == s)).unwrap_or(order.len());
        (listed, tier_rank[t as usize])
    };
    let mut out = vec![false; jobs.len()];
    let mut i = 0;
    while i < jobs.len() {
        let h = &rows[jobs[i].0];
        let mut j = i + 1;
        while j < jobs.len() && {
            let r = &rows[jobs[j].0];
            r.date == h.date && r.entity == h.entity && r.currency == h.currency
        } {
            j += 1;
        }
        let best = (i..j).min_by_key(|&k| rank(jobs[k].0)).unwrap_or(i);
        out[best] = true;
        i = j;
    }
    out
}

/// Curves calibrated in parallel before their rows are moved into the tables.
const CURVES_PER_BLOCK: usize = 8_192;

/// The panel's rows cut into pieces that start at block starts (`starts`: row indices,
/// increasing, the first 0) and hold at least [`ROWS_PER_PIECE`] rows each (the last may hold
/// fewer), each with the index of its first row, so that the rows of the blocks calibrated can
/// be freed as the calibration goes. Cut from the end, the whole vector shrinking after each
/// cut, so the rows are held about once at any time (2.7 GiB at 2,000 names x 10 years). A
/// piece is at least 32 MiB, above glibc's largest threshold for allocating by `mmap`, so
/// freeing it hands its pages straight back to the system instead of leaving them in one
/// thread's heap.
fn rows_in_pieces(mut rows: Vec<CdsQuoteRow>, starts: impl Iterator<Item = usize>) -> Vec<(usize, Vec<CdsQuoteRow>)> {
    let mut cuts = Vec::new();
    let mut last = 0;
    for start in starts {
        if start == 0 || start - last >= ROWS_PER_PIECE {
            cuts.push(start);
            last = start;
        }
    }
    let mut pieces = Vec::with_capacity(cuts.len());
    for &start in cuts.iter().rev() {
        if start == 0 {
            pieces.push((0, std::mem::take(&mut rows)));
        } else {
            pieces.push((start, rows.split_off(start)));
            rows.shrink_to_fit();
        }
    }
    pieces.reverse();
    pieces
}

/// A bootstrap plan's key: (date, currency, the curve's terms in order).
type PlanKey = (NaiveDate, u32, Vec<Term>);

fn plan_key(rows: &[CdsQuoteRow]) -> PlanKey {
    (rows[0].date, rows[0].currency, rows.iter().map(|r| (r.tenor, r.maturity)).collect())
}

/// The plans the curves of one piece of the panel use, built when the piece's calibration
/// starts and dropped after it, so that a run holds a few dates' plans at a time (all of ten
/// years' were 150 MiB, at any number of names).
#[derive(Default)]
struct Plans {
    /// One bootstrap plan per (date, currency, tenor set), shared by every name quoted so.
    run: FastMap<PlanKey, std::result::Result<BootstrapPlan, BootstrapError>>,
    /// One single-tenor plan per (date, currency, tenor) for the quoted spreads of the quote
    /// conversions (None when they are off).
    single: Option<SinglePlans>,
    /// The sensitivity shifts' plans (discount shift, accrual variants) per plan key on the
    /// sensitivity dates, shared by the curves quoted so as the run's own plans are.
    shifts: FastMap<PlanKey, OwnedPlans>,
}

impl Plans {
    /// The plans of the curves `jobs` (rows `a..b` of the panel, `rows` its rows from `first`
    /// on), keeping those of `before` dated on the piece's first date (a date can straddle two
    /// pieces) instead of building them again.
    fn for_piece(
        before: Plans,
        rows: &[CdsQuoteRow],
        first: usize,
        jobs: &[(usize, usize, bool)],
        curves: &BTreeMap<(NaiveDate, String), DiscountCurve>,
        panel: &CdsPanel,
        p: &CalibrationParams,
    ) -> Plans {
        let Some(day) = rows.first().map(|r| r.date) else {
            return Plans::default();
        };
        let Plans { mut run, mut single, mut shifts } = before;
        run.retain(|k, _| k.0 == day);
        shifts.retain(|k, _| k.0 == day);
        if let Some(s) = single.as_mut() {
            s.retain(|k, _| k.0 == day);
        }
        let curve_of = |date: NaiveDate, ccy: u32| curves.get(&(date, panel.currencies.name(ccy).to_string()));
        // The distinct keys; consecutive curves mostly share theirs.
        let mut keys: FastSet<PlanKey> = FastSet::default();
        let mut last: Option<&[CdsQuoteRow]> = None;
        for &(a, b, _) in jobs {
            let curve = &rows[a - first..b - first];
            let same = last.is_some_and(|l| {
                l[0].date == curve[0].date
                    && l[0].currency == curve[0].currency
                    && l.iter().map(|r| (r.tenor, r.maturity)).eq(curve.iter().map(|r| (r.tenor, r.maturity)))
            });
            if !same {
                let key = plan_key(curve);
                if !run.contains_key(&key) {
                    keys.insert(key);
                }
                last = Some(curve);
            }
        }
        // A plan for (date, currency, terms), when the day has a discount curve.
        let plan_for = |date: NaiveDate, ccy: u32, terms: &[Term]| {
            let cal = p.cds_calendar(panel.currencies.name(ccy));
            Some(BootstrapPlan::for_terms(date, terms, curve_of(date, ccy)?, cal, p.bootstrap.accrual))
        };
        let built = in_parallel(keys, |k| plan_for(k.0, k.1, &k.2));
        let shifted: FastSet<PlanKey> =
            built.iter().map(|(k, _)| k).filter(|k| p.sensitivity_dates.contains(k.0, &p.calendar)).cloned().collect();
        let new_shifts = in_parallel(shifted, |k| {
            let cal = p.cds_calendar(panel.currencies.name(k.1));
            Some(SharedPlans::build(k.0, &k.2, curve_of(k.0, k.1)?, cal, &p.bootstrap))
        });
        run.extend(built);
        shifts.extend(new_shifts);
        if p.quote_conversions {
            let single = single.get_or_insert_with(Default::default);
            let keys: FastSet<(NaiveDate, u32, Term)> = rows
                .iter()
                .map(|r| (r.date, r.currency, (r.tenor, r.maturity)))
                .filter(|k| !single.contains_key(k))
                .collect();
            let built = in_parallel(keys, |k| plan_for(k.0, k.1, &[k.2]));
            single.extend(built);
        }
        Plans { run, single, shifts }
    }
}

/// `build` of every key, on rayon's threads (a key it gives nothing for is left out).
fn in_parallel<K: Send, V: Send>(keys: FastSet<K>, build: impl Fn(&K) -> Option<V> + Sync) -> Vec<(K, V)> {
    keys.into_iter().collect::<Vec<_>>().into_par_iter().filter_map(|k| build(&k).map(|v| (k, v))).collect()
}

/// Rows per piece of [`rows_in_pieces`]: 40 MiB of rows.
const ROWS_PER_PIECE: usize = (40 << 20) / std::mem::size_of::<CdsQuoteRow>();

/// One block of calibrated curves, in key order (date, entity, currency, tier): their node
/// rows, their residual rows and the bootstrapped curves with their quotes.
#[derive(Debug, Default)]
pub struct CurveBlock {
    pub hazard: Vec<HazardCurveRow>,
    pub residuals: Vec<ResidualRow>,
    pub curves: Vec<BlockCurve>,
    /// The shifts of the block's curves on the sensitivity dates (grade not yet set).
    pub sensitivities: Vec<SensitivityRow>,
}

/// Calibrates every curve of the dataset's CDS panel, handing each block of curves to `sink`
/// in key order as soon as it is done; the returned [`Calibration`] has everything but the
/// rows and curves the blocks carried. Updates `ds.counts` with this stage's rejects and
/// checks the accounting again. The panel's rows are the calibration's to free: they are gone
/// from `ds` afterwards (the panel keeps their period). A curve dated outside `scope` is a
/// margin curve (see `run::partition::keep_dates`): it is calibrated and handed over in the
/// block's `curves`, but its rows, rejects and counts belong to another part and are left out.
/// Without `with_curves` the blocks carry no curves (their tables' rows only).
pub fn calibrate_blocks(
    ds: &mut crate::ingest::Dataset,
    p: &CalibrationParams,
    scope: crate::parts::DateRange,
    with_curves: bool,
    mut sink: impl FnMut(CurveBlock) -> Result<()>,
) -> Result<Calibration> {
    let disc_rows = ds.discount.as_ref().map(|d| d.rows.clone());
    let rate_rows = ds.rate_quotes.as_ref().map(|d| d.rows.clone());
    if disc_rows.is_none() && rate_rows.is_none() {
        return Err(Error::Argument {
            name: "inputs",
            message: "calibration needs the discount table or the rate_quotes table".into(),
        });
    }
    // The calibration is the panel's rows' last reader: it takes them, and frees each block's
    // rows once the block is calibrated (the period stays on the panel).
    let all_rows = {
        let panel = ds.cds.as_mut().ok_or_else(|| Error::Argument {
            name: "inputs",
            message: "calibration needs the cds_quotes table".into(),
        })?;
        panel.period = panel.quote_period();
        std::mem::take(&mut panel.rows)
    };
    let panel = ds.cds.as_ref().expect("checked above");
    let mut out = Calibration::default();
    let (mut curves, disc_used) = discount_curves(disc_rows.unwrap_or_default(), p.zero_rates, &mut out.rejects);
    let from_table: std::collections::BTreeSet<(NaiveDate, String)> = curves.keys().cloned().collect();
    let rate_used = rate_curves(rate_rows.unwrap_or_default(), p, &mut curves, &mut out.rejects);
    for ((date, ccy), c) in &curves {
        let source = if from_table.contains(&(*date, ccy.clone())) { "discount" } else { "rate_quotes" };
        for (&pillar, &ln_df) in c.pillar_dates().iter().zip(c.pillar_log_dfs()) {
            let t = crate::curves::year_time(*date, pillar);
            out.discount.push(DiscountCurveRow {
                date: *date,
                currency: ccy.clone(),
                source,
                pillar_date: pillar,
                zero_rate: -ln_df / t,
                discount_factor: ln_df.exp(),
            });
        }
    }

    // The day's discount curve by the panel's currency id (no name built per curve to find it).
    let by_ccy_id: FastMap<(NaiveDate, u32), &DiscountCurve> =
        curves.iter().filter_map(|((date, ccy), c)| panel.currencies.get(ccy).map(|id| ((*date, id), c))).collect();
    // Curves are consecutive runs of (date, entity, currency, tier) in the panel's sorted rows.
    let mut jobs: Vec<(usize, usize)> = Vec::new();
    let rows = &all_rows;
    let mut i = 0;
    while i < rows.len() {
        let mut j = i + 1;
        while j < rows.len()
            && rows[j].date == rows[i].date
            && rows[j].entity == rows[i].entity
            && rows[j].currency == rows[i].currency
            && rows[j].tier == rows[i].tier
        {
            j += 1;
        }
        jobs.push((i, j));
        i = j;
    }
    let reference = reference_jobs(panel, rows, &jobs, &p.seniority_order);
    let jobs: Vec<(usize, usize, bool)> = jobs.into_iter().zip(reference).map(|((a, b), r)| (a, b, r)).collect();
    let progress = crate::report::progress::bar(jobs.len() as u64, "calibrating curves");
    // Curves run in parallel a block at a time and each block goes to the sink before the
    // next starts, so the per-curve vectors of only one block are alive at once.
    let mut cds_used = 0;
    let mut pieces = rows_in_pieces(all_rows, jobs.chunks(CURVES_PER_BLOCK).map(|b| b[0].0)).into_iter();
    let mut piece: (usize, Vec<CdsQuoteRow>) = (0, Vec::new());
    let mut plans = Plans::default();
    let mut piece_jobs = 0..0;
    for block_jobs in jobs.chunks(CURVES_PER_BLOCK) {
        if block_jobs[0].0 >= piece.0 + piece.1.len() {
            // The blocks of the piece before are done: its rows go (a piece starts at a block),
            // and so do its plans but those of its last date, which the next piece may share.
            piece = pieces.next().ok_or_else(|| Error::Internal("the quote rows ended before the curves".into()))?;
            let end = piece.0 + piece.1.len();
            let from = piece_jobs.end;
            piece_jobs = from..from + jobs[from..].partition_point(|j| j.0 < end);
            plans = Plans::for_piece(plans, &piece.1, piece.0, &jobs[piece_jobs.clone()], &curves, panel, p);
        }
        let Plans { run: plans_run, single, shifts: shift_plans } = &plans;
        // The block's rows, by their index in the panel.
        let (first, rows) = (piece.0, &piece.1);
        let rows_of = |a: usize, b: usize| &rows[a - first..b - first];
        let outputs: Vec<CurveOutput> = block_jobs
            .par_iter()
            .map(|&(a, b, reference)| {
                let h = &rows_of(a, b)[0];
                let o = match by_ccy_id.get(&(h.date, h.currency)).copied() {
                    Some(curve) => {
                        let key = plan_key(rows_of(a, b));
                        calibrate_one(
                            panel,
                            rows_of(a, b),
                            curve,
                            plans_run.get(&key),
                            p,
                            with_curves.then_some(reference),
                            single.as_ref(),
                            if shift_plans.is_empty() || !p.sensitivity_dates.contains(h.date, &p.calendar) {
                                None
                            } else {
                                shift_plans.get(&key)
                            },
                        )
                    }
                    None => CurveOutput::rejected(
                        rows_of(a, b)
                            .iter()
                            .map(|r| {
                                panel.reject(
                                    r,
                                    "no_discount_curve",
                                    format!(
                                        "no usable {} discount curve on {}",
                                        panel.currencies.name(r.currency),
                                        r.date
                                    ),
                                )
                            })
                            .collect(),
                    ),
                };
                progress.inc(1);
                o
            })
            .collect();
        let mut block = CurveBlock::default();
        block.hazard.reserve_exact(outputs.iter().map(|o| o.hazard.len()).sum());
        block.residuals.reserve_exact(outputs.iter().map(|o| o.residuals.len()).sum());
        for (o, &(a, b, _)) in outputs.into_iter().zip(block_jobs) {
            if !scope.contains(rows_of(a, b)[0].date) {
                block.curves.extend(o.fit);
                continue;
            }
            cds_used += o.used;
            if !o.hazard.is_empty() {
                out.curves += 1;
                if o.hazard.iter().all(|h| h.status == RowStatus::Ok) {
                    out.curves_complete += 1;
                }
            }
            for h in &o.hazard {
                *out.nodes_by_status.entry(h.status.as_str()).or_default() += 1;
            }
            block.hazard.extend(o.hazard);
            for r in &o.residuals {
                if r.status == RowStatus::Ok {
                    out.max_abs_residual_bp = out.max_abs_residual_bp.max(r.residual_bp.abs());
                }
            }
            block.residuals.extend(o.residuals);
            block.sensitivities.extend(o.sensitivities);
            out.rejects.extend(o.rejects);
            block.curves.extend(o.fit);
        }
        sink(block)?;
    }
    progress.finish_and_clear();
    out.discount_curves = curves;
    for c in ds.counts.iter_mut() {
        let extra = out.rejects.iter().filter(|r| r.table == c.table).count();
        c.rejected += extra;
        if c.table == cds::TABLE {
            c.used = cds_used;
        } else if c.table == discount::TABLE {
            c.used = disc_used;
        } else if c.table == crate::ingest::rates::TABLE {
            c.used = rate_used;
        }
        if c.rows_in != c.used + c.rejected {
            return Err(Error::Accounting {
                table: c.table.to_string(),
                after: " after calibration",
                rows_in: c.rows_in,
                used: c.used,
                rejected: c.rejected,
            });
        }
    }
    out.rejects.sort_by(|a, b| (a.table, &a.source, a.row).cmp(&(b.table, &b.source, b.row)));
    Ok(out)
}

/// The most frequent reject reasons per table, most frequent first (ties by name).
pub fn top_reasons(rejects: &[Reject], n: usize) -> Vec<(String, &'static str, usize)> {
    let mut m: BTreeMap<(&'static str, &'static str), usize> = BTreeMap::new();
    for r in rejects {
        *m.entry((r.table, r.reason)).or_default() += 1;
    }
    let mut v: Vec<(String, &'static str, usize)> = m.into_iter().map(|((t, r), c)| (t.to_string(), r, c)).collect();
    v.sort_by(|a, b| b.2.cmp(&a.2).then(a.0.cmp(&b.0)).then(a.1.cmp(b.1)));
    v.truncate(n);
    v
}

/// Settings recorded in every output's key-value metadata.
pub fn metadata(p: &CalibrationParams, q: &QualitySettings) -> Vec<(String, String)> {
    let b = &p.bootstrap;
    vec![
        ("hazardline.version".into(), env!("CARGO_PKG_VERSION").into()),
        ("hazardline.default_recovery".into(), format!("{}", p.recovery)),
        ("hazardline.recovery_by_seniority".into(), format!("{:?}", p.recovery_by_seniority)),
        (
            "hazardline.accrual_on_default".into(),
            match b.accrual {
                AccrualIntegration::Published => "published (split at every curve node, with the half-day term)".into(),
                AccrualIntegration::Standard => "standard (one interval per coupon period)".into(),
                AccrualIntegration::Exact => "exact (split at every curve node)".into(),
            },
        ),
        (
            "hazardline.infeasible_policy".into(),
            match b.infeasible {
                InfeasiblePolicy::Floor => "floor".into(),
                InfeasiblePolicy::Fail => "fail".into(),
            },
        ),
        ("hazardline.hazard_tolerance".into(), format!("{:e}", b.hazard_tolerance)),
        ("hazardline.calendar".into(), format!("weekends + {} holidays", p.calendar.holidays().len())),
        ("hazardline.quality".into(), format!("{q:?}")),
    ]
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::instruments::CdsQuote;

    /// The reference tier of (date, entity, currency): the seniority listed first in
    /// `seniority_order`, unlisted ones after in name order (an absent seniority first), then
    /// the documentation clause in name order.
    #[test]
    fn reference_tier_follows_the_seniority_order() {
        let mut panel = CdsPanel::default();
        let d = NaiveDate::from_ymd_opt(2024, 3, 4).unwrap();
        let (e, c) = (panel.entities.id("A"), panel.currencies.id("USD"));
        let tiers = [
            panel.tiers.id(None, None),
            panel.tiers.id(Some("senior"), Some("full")),
            panel.tiers.id(Some("senior"), Some("none")),
            panel.tiers.id(Some("subordinated"), None),
        ];
        let row = |tier| CdsQuoteRow {
            date: d,
            entity: e,
            currency: c,
            tenor: Tenor::from_months(60).unwrap(),
            quote: CdsQuote::ParSpread(0.01),
            recovery: f64::NAN,
            tier,
            file: 0,
            row: 1,
            flags: 0,
            quoted_coupon_bp: f32::NAN,
            maturity: None,
        };
        panel.rows = tiers.iter().map(|&t| row(t)).collect();
        let jobs: Vec<(usize, usize)> = (0..4).map(|i| (i, i + 1)).collect();
        let chosen = |order: &[&str]| {
            let order: Vec<String> = order.iter().map(|s| s.to_string()).collect();
            reference_jobs(&panel, &panel.rows, &jobs, &order).iter().position(|&r| r)
        };
        assert_eq!(chosen(&[]), Some(0), "no order: the absent seniority first");
        assert_eq!(chosen(&["senior"]), Some(1), "senior listed: its first clause by name");
        assert_eq!(chosen(&["subordinated", "senior"]), Some(3));
        assert_eq!(reference_jobs(&panel, &panel.rows, &jobs, &[]).iter().filter(|&&r| r).count(), 1);
    }

    /// The pieces start at block starts only, each (but the last) holds at least
    /// ROWS_PER_PIECE rows, and together they are the rows in their order.
    #[test]
    fn rows_in_pieces_cut_at_block_starts() {
        let d = NaiveDate::from_ymd_opt(2024, 3, 4).unwrap();
        let n = 3 * ROWS_PER_PIECE + 17;
        let rows: Vec<CdsQuoteRow> = (0..n).map(|i| crate::ingest::cds::plain_row(d, 0, i as u32)).collect();
        let block = ROWS_PER_PIECE / 3 + 5;
        let starts: Vec<usize> = (0..n).step_by(block).collect();
        let pieces = rows_in_pieces(rows, starts.iter().copied());
        assert!(pieces.len() > 1);
        let mut next = 0;
        for (k, (first, piece)) in pieces.iter().enumerate() {
            assert_eq!(*first, next, "pieces follow each other");
            assert!(starts.contains(first), "a piece starts at a block start");
            if k + 1 < pieces.len() {
                assert!(piece.len() >= ROWS_PER_PIECE);
            }
            assert!(piece.iter().enumerate().all(|(i, r)| r.row as usize == first + i));
            next += piece.len();
        }
        assert_eq!(next, n, "every row is in one piece");
        assert!(rows_in_pieces(Vec::new(), std::iter::empty()).is_empty());
    }
}
