//! Bond-implied hazard curve per (date, entity), and the CDS-bond basis.
//!
//! Inputs: one name's bonds with their clean prices on the trade date ([`BondQuote`]), the
//! discount curve of the day, a recovery and a recovery convention. Output: a [`BondFit`] (rows
//! of `hazard_curves` with source `bond`, and of `calibration_residuals` with method
//! `bond_fit`, residuals in price and in bp of yield), and [`cds_bond_basis`] for the basis
//! against the CDS-implied curve.
//!
//! The curve form depends on how many distinct maturities there are (maturities closer than
//! `min_node_gap_years` share a node, placed at the later one):
//!
//! * at least `min_nodes_piecewise` nodes: piecewise-flat hazard with a node at each (grouped)
//!   bond maturity, flat beyond the last;
//! * two nodes: the two-parameter form lambda(t) = l + (s - l) e^{-t/tau} (s the short end, l
//!   the long end, tau fixed in the settings), held as a piecewise-flat curve on a monthly grid
//!   that has the form's exact integrated hazard at every grid node;
//! * one node: a flat hazard.
//!
//! Least squares over hazards in [0, max_hazard] with the projected Levenberg-Marquardt of
//! `calibrate::cir` (a handful of parameters; Jacobian by forward differences). Each bond's
//! residual is its clean-price error, model minus market, weighted by 1 / bid-ask when every
//! quote has a bid-ask, else by 1e4 / (dirty price x modified duration), which makes it the bp
//! of yield to first order. Residual rows report both the price error and the exact yield
//! difference in bp.
//!
//! Must not: read files or log; a bond that cannot be priced on the date is skipped and listed,
//! not fatal.

use crate::curves::{year_time, DiscountCurve, HazardCurve};
use crate::instruments::bond::{BondCashflows, BondError, BondOnDiscount, BondTerms, RecoveryConvention};
use crate::instruments::cds::{price_legs, AccrualIntegration, CdsContract, ReferenceDateMismatch};
use crate::math::least_squares::{levenberg_marquardt, LeastSquares, LmSettings};
use crate::models::cir::uniform_grid;
use crate::time::Calendar;
use chrono::NaiveDate;

/// One bond and its market price on the trade date.
#[derive(Debug, Clone, PartialEq)]
pub struct BondQuote {
    pub terms: BondTerms,
    /// Clean price per 100 face.
    pub clean_price: f64,
    /// Bid-ask width in price points, when known.
    pub bid_ask: Option<f64>,
}

/// Settings of the bond fit (recorded in the outputs' metadata by the caller).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BondFitSettings {
    pub recovery: f64,
    pub convention: RecoveryConvention,
    /// Fewest distinct nodes for the piecewise-flat form.
    pub min_nodes_piecewise: usize,
    /// Maturities closer than this (years) share a node.
    pub min_node_gap_years: f64,
    /// Decay time of the two-parameter form (years).
    pub parametric_tau: f64,
    /// Grid step of the two-parameter form's curve (years).
    pub parametric_grid_step: f64,
    /// Upper bound of every hazard parameter (per year).
    pub max_hazard: f64,
    pub lm: LmSettings,
}

impl Default for BondFitSettings {
    fn default() -> Self {
        BondFitSettings {
            recovery: 0.4,
            convention: RecoveryConvention::Par,
            min_nodes_piecewise: 3,
            min_node_gap_years: 0.5,
            parametric_tau: 3.0,
            parametric_grid_step: 1.0 / 12.0,
            max_hazard: 5.0,
            lm: LmSettings { max_iterations: 200, f_tol: 1e-14, x_tol: 1e-13, cost_floor: 1e-26 },
        }
    }
}

/// The form of a bond-implied curve.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum BondCurveForm {
    Flat,
    /// lambda(t) = l + (s - l) e^{-t/tau}.
    TwoParameter,
    PiecewiseFlat,
}
crate::text_form!(BondCurveForm { Flat => "flat", TwoParameter => "two_parameter", PiecewiseFlat => "piecewise_flat" });

/// Status of a node or of a whole fit.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum BondFitStatus {
    Ok,
    /// The hazard sits at zero: the prices would want a negative one.
    Floored,
    /// The hazard sits at the upper bound.
    AtUpperBound,
    /// The solver stopped at its iteration limit.
    MaxIterations,
    Failed,
}
crate::text_form!(BondFitStatus { Ok => "ok", Floored => "floored", AtUpperBound => "at_upper_bound", MaxIterations => "max_iterations", Failed => "failed" });

/// One node of the fitted curve, at a (grouped) bond maturity.
#[derive(Debug, Clone, PartialEq)]
pub struct BondNode {
    pub maturity: NaiveDate,
    /// Act/365F time from the trade date.
    pub time: f64,
    /// Hazard in force just before the maturity.
    pub hazard: f64,
    /// S(maturity).
    pub survival: f64,
    pub status: BondFitStatus,
}

/// One bond repriced on the fitted curve.
#[derive(Debug, Clone, PartialEq)]
pub struct BondResidual {
    /// Index into the input quotes.
    pub quote_index: usize,
    pub market_clean: f64,
    pub model_clean: f64,
    pub accrued: f64,
    /// Model minus market clean price, per 100 face.
    pub residual_price: f64,
    pub market_yield: f64,
    pub model_yield: f64,
    /// Model minus market yield, bp.
    pub residual_bp: f64,
    /// Weight of the price residual in the objective.
    pub weight: f64,
    /// Modified duration at the market yield.
    pub modified_duration: f64,
}

/// A bond-implied curve and its residuals.
#[derive(Debug, Clone, PartialEq)]
pub struct BondFit {
    pub trade_date: NaiveDate,
    pub form: BondCurveForm,
    pub curve: HazardCurve,
    pub nodes: Vec<BondNode>,
    pub bonds: Vec<BondResidual>,
    /// Bonds left out, with the reason.
    pub skipped: Vec<(usize, BondError)>,
    pub rmse_price: f64,
    pub rmse_yield_bp: f64,
    pub status: BondFitStatus,
    pub iterations: u32,
    /// True when bid-ask widths weighted the residuals (else durations).
    pub bid_ask_weights: bool,
}

/// Why no bond curve can be fitted.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum BondFitError {
    #[error("no bond can be priced on {trade} ({skipped} skipped)")]
    NoBonds { trade: NaiveDate, skipped: usize },
    #[error("discount curve is referenced on {discount}, not on the trade date {trade}")]
    ReferenceDate { trade: NaiveDate, discount: NaiveDate },
    #[error("recovery {recovery} is not a fraction in [0, 1)")]
    Recovery { recovery: f64 },
}

struct Prepared {
    index: usize,
    cf: BondCashflows,
    clean: f64,
    weight: f64,
    market_yield: f64,
    duration: f64,
}

struct Problem<'a> {
    trade: NaiveDate,
    bonds: &'a [Prepared],
    settings: &'a BondFitSettings,
    form: BondCurveForm,
    node_times: &'a [f64],
    grid: Vec<f64>,
    /// Each bond's discount terms for the hazard nodes of this problem's curves.
    on: Vec<BondOnDiscount>,
    r_tmp: Vec<f64>,
}

impl Problem<'_> {
    fn curve(&self, x: &[f64]) -> HazardCurve {
        match self.form {
            BondCurveForm::Flat => HazardCurve::new(self.trade, vec![self.node_times[0]], vec![x[0]]),
            BondCurveForm::PiecewiseFlat => HazardCurve::new(self.trade, self.node_times.to_vec(), x.to_vec()),
            BondCurveForm::TwoParameter => {
                let (s, l, tau) = (x[0], x[1], self.settings.parametric_tau);
                let big = |t: f64| l * t + (s - l) * tau * (-(-t / tau).exp_m1());
                let mut hz = Vec::with_capacity(self.grid.len());
                let (mut t0, mut h0) = (0.0, 0.0);
                for &t in &self.grid {
                    let h1 = big(t);
                    hz.push((h1 - h0) / (t - t0));
                    t0 = t;
                    h0 = h1;
                }
                HazardCurve::new(self.trade, self.grid.clone(), hz)
            }
        }
        .expect("increasing node times and finite hazards")
    }

    fn residuals(&self, x: &[f64], r: &mut [f64]) -> bool {
        let curve = self.curve(x);
        for (k, b) in self.bonds.iter().enumerate() {
            let clean = b.cf.clean_on(&self.on[k], &curve, self.settings.recovery, self.settings.convention);
            r[k] = (clean - b.clean) * b.weight;
            if !r[k].is_finite() {
                return false;
            }
        }
        true
    }
}

impl LeastSquares for Problem<'_> {
    fn dims(&self) -> (usize, usize) {
        let n = match self.form {
            BondCurveForm::Flat => 1,
            BondCurveForm::TwoParameter => 2,
            BondCurveForm::PiecewiseFlat => self.node_times.len(),
        };
        (n, self.bonds.len())
    }

    fn eval(&mut self, x: &[f64], r: &mut [f64], jac: Option<&mut [f64]>) -> bool {
        if !self.residuals(x, r) {
            return false;
        }
        if let Some(jac) = jac {
            let (n, m) = self.dims();
            let mut xp = x.to_vec();
            let mut tmp = std::mem::take(&mut self.r_tmp);
            tmp.resize(m, 0.0);
            for i in 0..n {
                // Forward step, backward at the upper bound.
                let h = 1e-7 * (1.0 + x[i].abs());
                let h = if x[i] + h > self.settings.max_hazard { -h } else { h };
                xp[i] = x[i] + h;
                let ok = self.residuals(&xp, &mut tmp);
                xp[i] = x[i];
                if !ok {
                    self.r_tmp = tmp;
                    return false;
                }
                for k in 0..m {
                    jac[k * n + i] = (tmp[k] - r[k]) / h;
                }
            }
            self.r_tmp = tmp;
        }
        true
    }
}

/// Fits the bond-implied hazard curve of one name on `trade`.
pub fn fit_bond_hazard(
    trade: NaiveDate,
    quotes: &[BondQuote],
    discount: &DiscountCurve,
    settings: &BondFitSettings,
) -> Result<BondFit, BondFitError> {
    if discount.reference() != trade {
        return Err(BondFitError::ReferenceDate { trade, discount: discount.reference() });
    }
    if !(settings.recovery.is_finite() && (0.0..1.0).contains(&settings.recovery)) {
        return Err(BondFitError::Recovery { recovery: settings.recovery });
    }
    let mut skipped = Vec::new();
    let mut bonds: Vec<Prepared> = Vec::with_capacity(quotes.len());
    let use_bid_ask = !quotes.is_empty() && quotes.iter().all(|q| q.bid_ask.is_some_and(|b| b.is_finite() && b > 0.0));
    for (i, q) in quotes.iter().enumerate() {
        if !(q.clean_price.is_finite() && q.clean_price > 0.0) {
            skipped.push((i, BondError::Price { price: q.clean_price }));
            continue;
        }
        let cf = match q.terms.cashflows(trade) {
            Ok(cf) => cf,
            Err(e) => {
                skipped.push((i, e));
                continue;
            }
        };
        let dirty = q.clean_price + cf.accrued;
        let market_yield = match cf.yield_from_dirty(dirty) {
            Ok(y) => y,
            Err(e) => {
                skipped.push((i, e));
                continue;
            }
        };
        let duration = cf.modified_duration(market_yield);
        let weight = if use_bid_ask { 1.0 / q.bid_ask.expect("checked") } else { 1e4 / (dirty * duration.max(1e-6)) };
        bonds.push(Prepared { index: i, cf, clean: q.clean_price, weight, market_yield, duration });
    }
    if bonds.is_empty() {
        return Err(BondFitError::NoBonds { trade, skipped: skipped.len() });
    }
    bonds.sort_by(|a, b| a.cf.t_maturity.total_cmp(&b.cf.t_maturity));

    // Group maturities closer than the gap; each group's node is its latest maturity.
    let mut groups: Vec<(f64, NaiveDate)> = Vec::new();
    for b in &bonds {
        let (t, m) = (b.cf.t_maturity, b.cf.periods.last().expect("not matured").accrual_end);
        match groups.last_mut() {
            Some(last) if t - last.0 < settings.min_node_gap_years => *last = (t, m),
            Some(last) if t == last.0 => *last = (t, m),
            _ => groups.push((t, m)),
        }
    }
    // The first group's node may sit within the gap of a later one only through the grouping
    // above, which always moves a node later, so node times stay increasing.
    let form = if groups.len() >= settings.min_nodes_piecewise.max(2) {
        BondCurveForm::PiecewiseFlat
    } else if groups.len() == 2 && bonds.len() >= 2 {
        BondCurveForm::TwoParameter
    } else {
        BondCurveForm::Flat
    };
    let node_times: Vec<f64> = groups.iter().map(|g| g.0).collect();
    let t_last = *node_times.last().expect("one group");

    // Start: the median yield spread over the risk-free yield, per unit of loss.
    let mut spreads: Vec<f64> = bonds
        .iter()
        .filter_map(|b| {
            let rf = b.cf.yield_from_dirty(b.cf.risk_free_dirty(discount)).ok()?;
            Some(b.market_yield - rf)
        })
        .collect();
    spreads.sort_by(f64::total_cmp);
    let lgd = match settings.convention {
        RecoveryConvention::Zero => 1.0,
        _ => 1.0 - settings.recovery,
    };
    let h0 = spreads.get(spreads.len() / 2).map_or(0.01, |s| (s / lgd).max(1e-4)).min(0.5 * settings.max_hazard);

    let n = match form {
        BondCurveForm::Flat => 1,
        BondCurveForm::TwoParameter => 2,
        BondCurveForm::PiecewiseFlat => node_times.len(),
    };
    let grid = if form == BondCurveForm::TwoParameter {
        uniform_grid(settings.parametric_grid_step, t_last)
    } else {
        Vec::new()
    };
    // The hazard nodes of every curve the problem builds (see Problem::curve).
    let curve_nodes: &[f64] = match form {
        BondCurveForm::Flat => &node_times[..1],
        BondCurveForm::PiecewiseFlat => &node_times,
        BondCurveForm::TwoParameter => &grid,
    };
    let on = bonds.iter().map(|b| b.cf.on_discount(discount, curve_nodes)).collect();
    let mut problem =
        Problem { trade, bonds: &bonds, settings, form, node_times: &node_times, grid, on, r_tmp: Vec::new() };
    let lo = vec![0.0; n];
    let hi = vec![settings.max_hazard; n];
    let out = levenberg_marquardt(&mut problem, &vec![h0; n], &lo, &hi, &vec![0.25; n], &settings.lm);
    let status = if out.failed {
        BondFitStatus::Failed
    } else if out.converged {
        BondFitStatus::Ok
    } else {
        BondFitStatus::MaxIterations
    };
    let curve = problem.curve(&out.x);

    let node_status = |h: f64| {
        if out.failed {
            BondFitStatus::Failed
        } else if h <= 0.0 {
            BondFitStatus::Floored
        } else if h >= settings.max_hazard {
            BondFitStatus::AtUpperBound
        } else {
            status
        }
    };
    let nodes: Vec<BondNode> = groups
        .iter()
        .enumerate()
        .map(|(k, &(t, maturity))| {
            let hazard = curve.hazard_at(t);
            let param = match form {
                BondCurveForm::PiecewiseFlat => out.x[k],
                BondCurveForm::Flat => out.x[0],
                BondCurveForm::TwoParameter => out.x[k.min(1)],
            };
            BondNode { maturity, time: t, hazard, survival: curve.survival_at(t), status: node_status(param) }
        })
        .collect();

    let mut residuals: Vec<BondResidual> = bonds
        .iter()
        .map(|b| {
            let p = b.cf.price_unchecked(discount, &curve, settings.recovery, settings.convention);
            let model_yield = b.cf.yield_from_dirty(p.dirty).unwrap_or(f64::NAN);
            BondResidual {
                quote_index: b.index,
                market_clean: b.clean,
                model_clean: p.clean,
                accrued: b.cf.accrued,
                residual_price: p.clean - b.clean,
                market_yield: b.market_yield,
                model_yield,
                residual_bp: (model_yield - b.market_yield) * 1e4,
                weight: b.weight,
                modified_duration: b.duration,
            }
        })
        .collect();
    residuals.sort_by_key(|r| r.quote_index);
    let m = residuals.len() as f64;
    let rmse_price = (residuals.iter().map(|r| r.residual_price * r.residual_price).sum::<f64>() / m).sqrt();
    let rmse_yield_bp = (residuals.iter().map(|r| r.residual_bp * r.residual_bp).sum::<f64>() / m).sqrt();
    Ok(BondFit {
        trade_date: trade,
        form,
        curve,
        nodes,
        bonds: residuals,
        skipped,
        rmse_price,
        rmse_yield_bp,
        status,
        iterations: out.iterations,
        bid_ask_weights: use_bid_ask,
    })
}

/// The CDS-bond basis at one maturity.
#[derive(Debug, Clone, PartialEq)]
pub struct BasisPoint {
    pub maturity: NaiveDate,
    pub time: f64,
    /// Average hazard -ln S(T) / T of the bond-implied and the CDS-implied curve.
    pub bond_average_hazard: f64,
    pub cds_average_hazard: f64,
    /// CDS minus bond average hazard, bp.
    pub hazard_basis_bp: f64,
    /// Par spread (bp) of a CDS to this maturity priced on each curve.
    pub bond_par_spread_bp: f64,
    pub cds_par_spread_bp: f64,
    /// CDS minus bond-implied par spread, bp (the basis in its usual sign).
    pub basis_bp: f64,
}

/// The CDS-bond basis at each of `maturities` (typically the bond maturities): a CDS traded
/// on `trade` running to that maturity (premium schedule on the standard quarterly dates, the
/// last period ending at the maturity) is priced with recovery `recovery` on the bond-implied
/// and on the CDS-implied curve.
pub fn cds_bond_basis(
    trade: NaiveDate,
    bond_curve: &HazardCurve,
    cds_curve: &HazardCurve,
    discount: &DiscountCurve,
    maturities: &[NaiveDate],
    recovery: f64,
    cal: &Calendar,
) -> Result<Vec<BasisPoint>, ReferenceDateMismatch> {
    let mut out = Vec::with_capacity(maturities.len());
    for &maturity in maturities {
        if maturity <= trade {
            continue;
        }
        let t = year_time(trade, maturity);
        let contract = CdsContract::with_maturity(trade, maturity, cal);
        let bond = price_legs(&contract, recovery, discount, bond_curve, AccrualIntegration::Standard)?;
        let cds = price_legs(&contract, recovery, discount, cds_curve, AccrualIntegration::Standard)?;
        let (hb, hc) = (bond_curve.integrated_hazard(t) / t, cds_curve.integrated_hazard(t) / t);
        let (sb, sc) = (bond.par_spread() * 1e4, cds.par_spread() * 1e4);
        out.push(BasisPoint {
            maturity,
            time: t,
            bond_average_hazard: hb,
            cds_average_hazard: hc,
            hazard_basis_bp: (hc - hb) * 1e4,
            bond_par_spread_bp: sb,
            cds_par_spread_bp: sc,
            basis_bp: sc - sb,
        });
    }
    Ok(out)
}
