//! The CIR pricer of one day's quotes: the standard contracts of the quotes on one pricing
//! grid, repriced under CIR survival with values or exact gradients.

use super::*;
use crate::calibrate::bootstrap::BootstrapQuote;
use crate::calibrate::residuals::QuoteResidual;
use crate::curves::DiscountCurve;
use crate::instruments::cds::{add_coupon, evaluate_terms, protection_term, CdsContract, CdsQuote, LegPlan};
use crate::math::grad::Grad4;
use crate::models::cir::{uniform_grid, CirCoefficients, CirScalar};
use crate::time::{add_days, Calendar};

#[derive(Clone)]
pub(crate) struct Leg {
    pub(crate) quote_index: usize,
    pub(crate) tenor: Tenor,
    /// Running coupon that the annuity multiplies (the par spread for a par quote).
    pub(crate) coupon: f64,
    /// Upfront paid at cash settlement (0 for a par quote).
    pub(crate) upfront: f64,
    pub(crate) one_minus_r: f64,
    pub(crate) quote: CdsQuote,
}

/// The pricing grid and the contracts of one day, built once per fit.
#[derive(Clone)]
pub(crate) struct CirPricer {
    pub(crate) plan: LegPlan,
    pub(crate) legs: Vec<Leg>,
    /// Index (in plan.contracts) of the contract with the latest maturity.
    pub(crate) longest: usize,
    /// True when every contract's protection nodes are a prefix of the longest's (always, by
    /// the construction of the plan); then the protection sums share one pass.
    pub(crate) shared_protection: bool,
    /// True when every contract's coupons but its last are those of the longest (always, for
    /// the standard contracts of one day: they share their schedule up to their own final
    /// period); then the premium and accrual-on-default sums share one pass too.
    pub(crate) shared_coupons: bool,
    /// Kept for the default start (a bootstrap of the same quotes).
    pub(crate) discount: DiscountCurve,
    pub(crate) calendar: Calendar,
}

pub(crate) fn check_quote(index: usize, q: &BootstrapQuote) -> Result<(), CirFitError> {
    let bad = |what, value, expected| Err(CirFitError::BadValue { index, what, value, expected });
    if !(q.recovery >= 0.0 && q.recovery < 1.0) {
        return bad("recovery", q.recovery, "a fraction in [0, 1)");
    }
    match q.quote {
        CdsQuote::ParSpread(s) if !(s > 0.0 && s.is_finite()) => bad("par spread", s, "a positive number"),
        CdsQuote::Upfront { upfront, .. } if !(upfront.is_finite() && upfront < 1.0) => {
            bad("upfront", upfront, "a finite fraction of notional below 1")
        }
        CdsQuote::Upfront { coupon, .. } if !(coupon.is_finite() && coupon >= 0.0) => {
            bad("running coupon", coupon, "a non-negative number")
        }
        _ => Ok(()),
    }
}

impl CirPricer {
    pub(crate) fn new(
        trade: NaiveDate,
        quotes: &[BootstrapQuote],
        discount: &DiscountCurve,
        cal: &Calendar,
        grid_step: f64,
        accrual: AccrualIntegration,
    ) -> Result<CirPricer, CirFitError> {
        if quotes.is_empty() {
            return Err(CirFitError::NoQuotes);
        }
        if discount.reference() != trade {
            return Err(CirFitError::ReferenceDate { trade, discount: discount.reference() });
        }
        let mut order: Vec<(usize, CdsContract)> = Vec::with_capacity(quotes.len());
        for (i, q) in quotes.iter().enumerate() {
            check_quote(i, q)?;
            let c = q.contract(trade, cal).map_err(|source| CirFitError::Maturity { index: i, source })?;
            order.push((i, c));
        }
        order.sort_by_key(|(_, c)| c.maturity);
        for w in order.windows(2) {
            if w[0].1.maturity == w[1].1.maturity {
                return Err(CirFitError::DuplicateMaturity {
                    first: w[0].0,
                    second: w[1].0,
                    maturity: w[0].1.maturity,
                });
            }
        }
        let last = &order.last().expect("non-empty").1;
        let t_end = crate::curves::year_time(trade, last.maturity).max(crate::curves::year_time(
            trade,
            last.periods.last().map(|p| add_days(p.payment, -1)).unwrap_or(last.maturity),
        ));
        let nodes = uniform_grid(grid_step, t_end);
        let refs: Vec<&CdsContract> = order.iter().map(|(_, c)| c).collect();
        let plan = LegPlan::build(trade, &refs, discount, &nodes, accrual);
        let legs = order
            .iter()
            .map(|(i, _)| {
                let q = &quotes[*i];
                let (coupon, upfront) = match q.quote {
                    CdsQuote::ParSpread(s) => (s, 0.0),
                    CdsQuote::Upfront { upfront, coupon } => (coupon, upfront),
                };
                Leg { quote_index: *i, tenor: q.tenor, coupon, upfront, one_minus_r: 1.0 - q.recovery, quote: q.quote }
            })
            .collect();
        let longest = plan.contracts.len() - 1;
        let lp = &plan.contracts[longest].prot;
        let shared_protection = plan.contracts.iter().all(|c| {
            let m = c.prot.len();
            m >= 2 && m <= lp.len() && c.prot[..m - 1] == lp[..m - 1]
        });
        let lc = &plan.contracts[longest].coupons;
        let shared_coupons = plan.contracts.iter().all(|c| {
            let m = c.coupons.len();
            m >= 1 && m <= lc.len() && c.coupons[..m - 1].iter().zip(lc).all(|(a, b)| a.same_terms(b, &plan))
        });
        Ok(CirPricer {
            plan,
            legs,
            longest,
            shared_protection,
            shared_coupons,
            discount: discount.clone(),
            calendar: cal.clone(),
        })
    }

    pub(crate) fn len(&self) -> usize {
        self.legs.len()
    }

    /// Residuals (bp) of every quote, in maturity order, plus (protection, annuity) per quote.
    pub(crate) fn evaluate<S: CirScalar>(
        &self,
        kappa: S,
        theta: S,
        sigma: S,
        lambda0: S,
        buf: &mut Buffers<S>,
        out: &mut [S],
        legs_out: Option<&mut Vec<(f64, f64)>>,
    ) -> bool {
        let coef = CirCoefficients::new(kappa, sigma);
        self.evaluate_with(|_, t| coef.at(t), theta, lambda0, buf, out, legs_out)
    }

    /// The affine coefficients (a(t), B(t)) of kappa and sigma at every point of the grid
    /// (t <= 0 gives (0, 0), which the pricer never reads), computed once for evaluations that
    /// hold kappa and sigma. The values are those [`CirPricer::evaluate`] computes at each
    /// call, bit for bit: the same function of the same (kappa, sigma, t).
    pub(crate) fn coefficients<S: CirScalar>(&self, kappa: S, sigma: S) -> Vec<(S, S)> {
        let coef = CirCoefficients::new(kappa, sigma);
        self.plan
            .times
            .iter()
            .map(|&t| if t <= 0.0 { (S::constant(0.0), S::constant(0.0)) } else { coef.at(t) })
            .collect()
    }

    /// [`CirPricer::evaluate`] with the affine coefficients of grid point j (time t) given by
    /// `ab(j, t)`: `evaluate` computes them from kappa and sigma; the window's fits take them
    /// from values computed once (kappa and sigma held, or shared by the window's days).
    pub(crate) fn evaluate_with<S: CirScalar>(
        &self,
        ab: impl Fn(usize, f64) -> (S, S),
        theta: S,
        lambda0: S,
        buf: &mut Buffers<S>,
        out: &mut [S],
        legs_out: Option<&mut Vec<(f64, f64)>>,
    ) -> bool {
        let plan = &self.plan;
        let np = plan.times.len();
        buf.lq.clear();
        buf.pq.clear();
        for j in 0..np {
            let t = plan.times[j];
            let lq = if t <= 0.0 {
                S::constant(0.0)
            } else {
                let (a, b) = ab(j, t);
                theta * a - lambda0 * b
            };
            buf.lq.push(lq);
            buf.pq.push((lq + plan.log_dfs[j]).exp());
        }
        let (lq, pq) = (&buf.lq, &buf.pq);
        let term = |i0: u32, i1: u32| -> S {
            let (i0, i1) = (i0 as usize, i1 as usize);
            protection_term(pq[i0], pq[i1], plan.log_dfs[i0] - plan.log_dfs[i1], lq[i0] - lq[i1])
        };
        buf.cum.clear();
        if self.shared_protection {
            let lp = &plan.contracts[self.longest].prot;
            let mut acc = S::constant(0.0);
            buf.cum.push(acc);
            for w in lp[..lp.len() - 1].windows(2) {
                acc = acc + term(w[0], w[1]);
                buf.cum.push(acc);
            }
        }
        // The premium and accrual-on-default sums after each of the longest contract's coupons
        // but its last, in its order: a contract's sums are those after its own coupons but
        // the last, plus its last (the same additions, in the same order, as its own pass).
        buf.cum_coupons.clear();
        if self.shared_coupons {
            let lc = &plan.contracts[self.longest].coupons;
            let (mut prem, mut aod) = (S::constant(0.0), S::constant(0.0));
            buf.cum_coupons.push((prem, aod));
            for c in &lc[..lc.len() - 1] {
                add_coupon(plan, c, pq, lq, &mut prem, &mut aod);
                buf.cum_coupons.push((prem, aod));
            }
        }
        let mut legs_out = legs_out;
        if let Some(l) = legs_out.as_deref_mut() {
            l.clear();
        }
        for (k, (c, leg)) in plan.contracts.iter().zip(&self.legs).enumerate() {
            let prot = if self.shared_protection {
                let m = c.prot.len();
                buf.cum[m - 2] + term(c.prot[m - 2], c.prot[m - 1])
            } else {
                evaluate_terms(plan, &c.prot, &[], pq, lq).0
            };
            let (prem, aod) = if self.shared_coupons {
                let m = c.coupons.len();
                let (mut prem, mut aod) = buf.cum_coupons[m - 1];
                add_coupon(plan, &c.coupons[m - 1], pq, lq, &mut prem, &mut aod);
                (prem, aod)
            } else {
                let (_, prem, aod) = evaluate_terms(plan, &[], &c.coupons, pq, lq);
                (prem, aod)
            };
            let prot = prot * leg.one_minus_r;
            let ann = prem + aod - c.rebate01 * c.cash_settle_df;
            let r = (prot - ann * leg.coupon - leg.upfront * c.cash_settle_df) / ann * 1e4;
            if !r.value().is_finite() {
                return false;
            }
            out[k] = r;
            if let Some(l) = legs_out.as_deref_mut() {
                l.push((prot.value(), ann.value()));
            }
        }
        true
    }

    /// The repriced quotes in input order.
    pub(crate) fn residual_rows(&self, p: &CirParams) -> Vec<QuoteResidual> {
        let mut buf = Buffers::default();
        let mut out = vec![0.0; self.len()];
        let mut legs = Vec::new();
        if !self.evaluate(p.kappa, p.theta, p.sigma, p.lambda0, &mut buf, &mut out, Some(&mut legs)) {
            return Vec::new();
        }
        let mut rows: Vec<QuoteResidual> = self
            .legs
            .iter()
            .zip(&self.plan.contracts)
            .zip(legs.iter().zip(&out))
            .map(|((leg, c), (&(prot, ann), &r))| {
                let par_bp = prot / ann * 1e4;
                let (instrument, market, model) = match leg.quote {
                    CdsQuote::ParSpread(s) => ("cds_par_spread", s * 1e4, par_bp),
                    CdsQuote::Upfront { upfront, coupon } => {
                        ("cds_upfront", upfront, (prot - coupon * ann) / c.cash_settle_df)
                    }
                };
                QuoteResidual {
                    quote_index: leg.quote_index,
                    tenor: leg.tenor,
                    instrument,
                    market,
                    model,
                    residual_bp: r,
                    model_par_spread_bp: par_bp,
                    risky_annuity: ann,
                    cash_settle_df: c.cash_settle_df,
                }
            })
            .collect();
        rows.sort_by_key(|r| r.quote_index);
        rows
    }
}

pub(crate) struct Buffers<S> {
    pub(crate) lq: Vec<S>,
    pub(crate) pq: Vec<S>,
    pub(crate) cum: Vec<S>,
    pub(crate) cum_coupons: Vec<(S, S)>,
}

impl<S> Default for Buffers<S> {
    fn default() -> Self {
        Buffers { lq: Vec::new(), pq: Vec::new(), cum: Vec::new(), cum_coupons: Vec::new() }
    }
}

impl CirScalar for Grad4 {
    #[inline]
    fn sqrt(self) -> Grad4 {
        let s = self.v.sqrt();
        self.chain(s, 0.5 / s)
    }
    #[inline]
    fn ln_1p(self) -> Grad4 {
        self.chain(self.v.ln_1p(), 1.0 / (1.0 + self.v))
    }
    #[inline]
    fn exp_m1(self) -> Grad4 {
        self.chain(self.v.exp_m1(), self.v.exp())
    }
    #[inline]
    fn recip(self) -> Grad4 {
        let r = 1.0 / self.v;
        self.chain(r, -r * r)
    }
}

/// Par spreads (decimal) of the standard contracts of `tenors` under CIR parameters `p`, all
/// with recovery `recovery` (for tests and for generating curves from known parameters).
pub fn cir_par_spreads(
    trade: NaiveDate,
    tenors: &[Tenor],
    recovery: f64,
    discount: &DiscountCurve,
    cal: &Calendar,
    p: &CirParams,
    settings: &CirFitSettings,
) -> Result<Vec<f64>, CirFitError> {
    // Any par quote will do: the repriced par spread does not depend on it.
    let quotes: Vec<BootstrapQuote> = tenors
        .iter()
        .map(|&tenor| BootstrapQuote { tenor, quote: CdsQuote::ParSpread(0.01), recovery, maturity: None })
        .collect();
    let pricer = CirPricer::new(trade, &quotes, discount, cal, settings.grid_step, settings.accrual)?;
    let rows = pricer.residual_rows(p);
    Ok(rows.iter().map(|r| r.model_par_spread_bp / 1e4).collect())
}
