//! Sequential bootstrap of a piecewise-flat hazard curve from standard-contract CDS quotes.
//!
//! Quotes are taken in maturity order; segment k of the curve ends at adjust(maturity_k) + 1
//! day. For each new segment one safeguarded Newton root-find on its hazard makes the
//! repriced quote equal to the market's. The legs are split once per contract into the part
//! that only depends on earlier, already solved segments (summed once, in plain f64) and the
//! part that depends on the new hazard (re-evaluated with dual numbers each iteration), so
//! earlier segments are never re-integrated.
//!
//! A quote that would need a negative hazard is infeasible: by the settings the segment is
//! floored at zero (its residual then shows the misfit) or the curve fails. A quote that no
//! hazard up to the search limit can reach stops the curve at that tenor. Nothing is capped
//! silently.

use crate::curves::{year_time, DiscountCurve, HazardCurve};
use crate::instruments::cds::{
    evaluate_terms, one_node_legs, AccrualIntegration, CdsContract, CdsQuote, ContractTerms, LegPlan, RunningSums,
};
use crate::instruments::term_lanes::{segment_points, Lanes, TermLayout};
use crate::math::exp::{exp, exp_in_place};
use crate::math::{newton_bracketed, Dual, RootError, Scalar};
use crate::time::imm::MaturityError;
use crate::time::{add_days, Calendar, Tenor};
use chrono::NaiveDate;

/// What to do with a quote that would need a negative hazard.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum InfeasiblePolicy {
    /// Set the segment's hazard to zero, mark the node `floored`, carry on.
    #[default]
    Floor,
    /// Stop: the whole curve is marked failed.
    Fail,
}
crate::text_form!(InfeasiblePolicy { Floor => "floor", Fail => "fail" });

/// Bootstrap settings (all recorded in the outputs' metadata by the caller).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BootstrapSettings {
    pub accrual: AccrualIntegration,
    pub infeasible: InfeasiblePolicy,
    /// Absolute tolerance on each segment's hazard (per year).
    pub hazard_tolerance: f64,
    pub max_iterations: u32,
    /// Upper end of the root search (per year). Not a cap: a quote that needs more is reported.
    pub max_hazard: f64,
}

impl Default for BootstrapSettings {
    fn default() -> Self {
        BootstrapSettings {
            accrual: AccrualIntegration::Published,
            infeasible: InfeasiblePolicy::Floor,
            hazard_tolerance: 1e-14,
            max_iterations: 100,
            max_hazard: 1.0e4,
        }
    }
}

/// One quote of a curve.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BootstrapQuote {
    pub tenor: Tenor,
    pub quote: CdsQuote,
    pub recovery: f64,
    /// The contract's maturity when it is off the standard roll of `tenor` (None: the
    /// standard roll, [`crate::time::cds_maturity`]).
    pub maturity: Option<NaiveDate>,
}

impl BootstrapQuote {
    /// The contract quoted, traded on `trade`.
    pub fn contract(&self, trade: NaiveDate, cal: &Calendar) -> Result<CdsContract, MaturityError> {
        match self.maturity {
            Some(m) => Ok(CdsContract::with_maturity(trade, m, cal)),
            None => CdsContract::standard(trade, self.tenor, cal),
        }
    }

    /// The quote's term: its tenor and, off the standard roll, its maturity.
    pub fn term(&self) -> (Tenor, Option<NaiveDate>) {
        (self.tenor, self.maturity)
    }

    /// A quoted spread `spread` (decimal) at running coupon `coupon` on this quote's contract,
    /// as the upfront quote it trades as: the upfront of the flat hazard whose par spread is the
    /// quote, at this quote's recovery ([`crate::instruments::cds::quoted_spread`]). Err says
    /// why when the contract cannot be built or no flat hazard up to 50 per year reaches the
    /// spread.
    pub fn quoted_spread_as_upfront(
        &self,
        trade: NaiveDate,
        spread: f64,
        coupon: f64,
        discount: &DiscountCurve,
        cal: &Calendar,
        accrual: AccrualIntegration,
    ) -> Result<CdsQuote, String> {
        let contract = self.contract(trade, cal).map_err(|e| format!("the {} contract: {e}", self.tenor))?;
        crate::instruments::cds::quoted_spread::to_upfront(&contract, spread, coupon, self.recovery, discount, accrual)
            .map(|upfront| CdsQuote::Upfront { upfront, coupon })
            .ok_or_else(|| {
                format!("the {} quoted spread {} bp has no flat hazard up to 50 per year", self.tenor, spread * 1e4)
            })
    }
}

/// Status of one curve node.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum NodeStatus {
    /// Solved; the quote reprices.
    Ok,
    /// Would need a negative hazard; floored at zero (the residual shows the misfit).
    Floored,
    /// This node's quote cannot be met (negative hazard under the fail policy, or above the
    /// search limit).
    Infeasible,
    /// The root search did not converge.
    Failed,
    /// Solved, but a later node failed the curve under the fail policy.
    CurveFailed,
    /// Not reached: an earlier node stopped the curve.
    NotCalibrated,
}
crate::text_form!(NodeStatus { Ok => "ok", Floored => "floored", Infeasible => "infeasible", Failed => "failed", CurveFailed => "curve_failed", NotCalibrated => "not_calibrated" });

impl NodeStatus {
    /// True when the node's hazard is a usable calibration result.
    pub fn usable(self) -> bool {
        matches!(self, NodeStatus::Ok | NodeStatus::Floored)
    }
}

/// The fit of one node, in the order of the input quotes.
#[derive(Debug, Clone, PartialEq)]
pub struct NodeFit {
    /// Index of the quote in the input slice.
    pub quote_index: usize,
    pub tenor: Tenor,
    /// Unadjusted contract maturity.
    pub maturity: NaiveDate,
    /// End of the hazard segment: adjust(maturity) + 1 day.
    pub node_date: NaiveDate,
    pub hazard: Option<f64>,
    /// S(maturity).
    pub survival: Option<f64>,
    pub status: NodeStatus,
    pub iterations: u32,
    /// Why the node is not `ok`, naming target and achieved values.
    pub detail: Option<String>,
}

/// A bootstrapped curve.
#[derive(Debug, Clone, PartialEq)]
pub struct CurveFit {
    pub trade_date: NaiveDate,
    /// Nodes in maturity order.
    pub nodes: Vec<NodeFit>,
    /// The curve over the solved nodes, in maturity order (None when no node was solved).
    /// Under the fail policy a failed curve still carries its solved part, for residuals;
    /// `failed` says not to use it.
    pub curve: Option<HazardCurve>,
    /// True when the fail policy stopped the curve.
    pub failed: bool,
    /// The contracts, in the order of `nodes` (shared with the plan that built them).
    pub contracts: std::sync::Arc<[CdsContract]>,
}

impl CurveFit {
    /// True when every node is usable.
    pub fn complete(&self) -> bool {
        self.nodes.iter().all(|n| n.status.usable())
    }
}

/// Why a set of quotes cannot be bootstrapped at all (the caller turns these into rejects).
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum BootstrapError {
    #[error("no quotes")]
    NoQuotes,
    #[error("quote {index}: {source}")]
    Maturity { index: usize, source: MaturityError },
    #[error("quotes {first} and {second} have the same maturity {maturity}")]
    DuplicateMaturity { first: usize, second: usize, maturity: NaiveDate },
    #[error("quote {index}: {what} {value} is not valid ({expected})")]
    BadValue { index: usize, what: &'static str, value: f64, expected: &'static str },
    #[error("the quotes do not match the tenors of the bootstrap plan")]
    PlanMismatch,
    #[error("discount curve is referenced on {discount}, not on the trade date {trade}")]
    ReferenceDate { trade: NaiveDate, discount: NaiveDate },
}

fn check_quote(index: usize, q: &BootstrapQuote) -> Result<(), BootstrapError> {
    let bad = |what, value, expected| Err(BootstrapError::BadValue { index, what, value, expected });
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

/// Everything a bootstrap needs that depends only on the trade date, the tenors, the discount
/// curve and the calendar: the contracts, the hazard nodes and the leg plan on the joint grid.
/// Names quoted on the same day for the same tenors in the same currency share one plan, so
/// a panel builds it once per (date, currency, tenor set) instead of once per curve.
#[derive(Debug, Clone)]
pub struct BootstrapPlan {
    trade: NaiveDate,
    tenors: Vec<Tenor>,
    /// The maturities off the standard roll, by quote (None: the tenor's standard roll).
    maturities: Vec<Option<NaiveDate>>,
    /// Quote index of each node, in maturity order.
    order: Vec<usize>,
    contracts: std::sync::Arc<[CdsContract]>,
    node_dates: Vec<NaiveDate>,
    node_times: Vec<f64>,
    plan: LegPlan,
    accrual: AccrualIntegration,
    /// Whether contract k's terms before its last coupon and its last protection node equal
    /// the longest contract's (true for the standard contracts of one trade date, whose
    /// schedules are prefixes of one another); the bootstrap then takes the part of its legs
    /// fixed by solved segments from running sums over the longest contract, instead of
    /// summing it again for every node.
    shares_prefix: Vec<bool>,
    /// Per node, where its contract and the grid split at the previous node's time.
    cuts: Vec<NodeCut>,
}

/// Where node k's contract and the grid split at the previous node's time `t_prev` (0 for the
/// first node): node k is solved right after node k - 1 (a failed node stops the curve), so
/// all of this is known when the plan is built.
#[derive(Debug, Clone)]
struct NodeCut {
    /// The protection node the part on the new segment starts from, and the first paid coupon
    /// whose survival point is after `t_prev`.
    prot_from: usize,
    coupon_from: usize,
    /// The grid points the new part's terms read, and the first of them after `t_prev`.
    first_point: usize,
    last_point: usize,
    moving_from: usize,
    /// The grid points on the segment, in (t_prev, t_k].
    segment: std::ops::Range<usize>,
    /// The new part's intervals laid out for the Newton steps.
    layout: TermLayout,
}

impl NodeCut {
    fn new(plan: &LegPlan, terms: &ContractTerms, t_prev: f64, t_k: f64) -> NodeCut {
        let prot_from =
            terms.prot.windows(2).position(|w| plan.times[w[1] as usize] > t_prev).unwrap_or(terms.prot.len() - 1);
        let coupon_from = terms
            .coupons
            .iter()
            .position(|c| c.paid && plan.times[c.q_idx as usize] > t_prev)
            .unwrap_or(terms.coupons.len());
        let var_prot = &terms.prot[prot_from..];
        let var_coupons = &terms.coupons[coupon_from..];
        let first_point = var_coupons
            .iter()
            .filter(|c| c.paid)
            .map(|c| plan.aod_path.get(c.aod_from as usize).copied().unwrap_or(c.q_idx).min(c.q_idx))
            .chain(std::iter::once(var_prot[0]))
            .min()
            .unwrap_or(0) as usize;
        let last_point =
            var_coupons.iter().filter(|c| c.paid).map(|c| c.q_idx).chain(var_prot.iter().copied()).max().unwrap_or(0)
                as usize;
        let after_prev = plan.times.partition_point(|&t| t <= t_prev);
        let to = plan.times.partition_point(|&t| t <= t_k).max(after_prev);
        NodeCut {
            prot_from,
            coupon_from,
            first_point,
            last_point,
            moving_from: first_point.max(after_prev),
            segment: after_prev..to,
            layout: TermLayout::new(plan, var_prot, var_coupons),
        }
    }
}

impl BootstrapPlan {
    /// Builds the plan for quotes of `tenors` on the standard roll (in the order the quotes
    /// will come).
    pub fn new(
        trade: NaiveDate,
        tenors: &[Tenor],
        discount: &DiscountCurve,
        cal: &Calendar,
        accrual: AccrualIntegration,
    ) -> Result<BootstrapPlan, BootstrapError> {
        let terms: Vec<(Tenor, Option<NaiveDate>)> = tenors.iter().map(|&t| (t, None)).collect();
        BootstrapPlan::for_terms(trade, &terms, discount, cal, accrual)
    }

    /// Builds the plan for quotes of `terms` (tenor, and maturity when off the standard roll;
    /// see [`BootstrapQuote::term`]), in the order the quotes will come.
    pub fn for_terms(
        trade: NaiveDate,
        terms: &[(Tenor, Option<NaiveDate>)],
        discount: &DiscountCurve,
        cal: &Calendar,
        accrual: AccrualIntegration,
    ) -> Result<BootstrapPlan, BootstrapError> {
        let tenors: Vec<Tenor> = terms.iter().map(|t| t.0).collect();
        let tenors = &tenors[..];
        if tenors.is_empty() {
            return Err(BootstrapError::NoQuotes);
        }
        if discount.reference() != trade {
            return Err(BootstrapError::ReferenceDate { trade, discount: discount.reference() });
        }
        let mut order: Vec<(usize, CdsContract)> = Vec::with_capacity(tenors.len());
        for (i, c) in CdsContract::term_set(trade, terms, cal).into_iter().enumerate() {
            order.push((i, c.map_err(|source| BootstrapError::Maturity { index: i, source })?));
        }
        order.sort_by_key(|(_, c)| c.maturity);
        for w in order.windows(2) {
            if w[0].1.maturity == w[1].1.maturity {
                return Err(BootstrapError::DuplicateMaturity {
                    first: w[0].0,
                    second: w[1].0,
                    maturity: w[0].1.maturity,
                });
            }
        }
        let node_dates: Vec<NaiveDate> = order.iter().map(|(_, c)| add_days(cal.following(c.maturity), 1)).collect();
        let node_times: Vec<f64> = node_dates.iter().map(|&d| year_time(trade, d)).collect();
        let refs: Vec<&CdsContract> = order.iter().map(|(_, c)| c).collect();
        let plan = LegPlan::build(trade, &refs, discount, &node_times, accrual);
        let (idx, contracts): (Vec<usize>, Vec<CdsContract>) = order.into_iter().unzip();
        let last = plan.contracts.last().expect("at least one contract");
        let shares_prefix = plan
            .contracts
            .iter()
            .map(|c| {
                let (nc, np) = (c.coupons.len(), c.prot.len());
                nc <= last.coupons.len()
                    && np <= last.prot.len()
                    && c.prot[..np - 1] == last.prot[..np - 1]
                    && (0..nc.saturating_sub(1)).all(|j| {
                        let (a, b) = (&c.coupons[j], &last.coupons[j]);
                        a == b
                            || (a.accrual == b.accrual
                                && a.pay_df_ratio == b.pay_df_ratio
                                && a.q_idx == b.q_idx
                                && a.t_s == b.t_s
                                && a.paid == b.paid
                                && plan.aod_path[a.aod_from as usize..a.aod_to as usize]
                                    == plan.aod_path[b.aod_from as usize..b.aod_to as usize])
                    })
            })
            .collect();
        let cuts = (0..plan.contracts.len())
            .map(|k| {
                let t_prev = if k == 0 { 0.0 } else { node_times[k - 1] };
                NodeCut::new(&plan, &plan.contracts[k], t_prev, node_times[k])
            })
            .collect();
        Ok(BootstrapPlan {
            trade,
            tenors: tenors.to_vec(),
            maturities: terms.iter().map(|t| t.1).collect(),
            order: idx,
            contracts: contracts.into(),
            node_dates,
            node_times,
            plan,
            accrual,
            shares_prefix,
            cuts,
        })
    }

    pub fn tenors(&self) -> &[Tenor] {
        &self.tenors
    }

    /// The legs of every contract of the plan (maturity order) on `curve`, when the curve's
    /// nodes are the plan's (a complete fit on this plan): the same grid
    /// [`crate::instruments::cds::price_legs_set`] would build, so the same numbers, without
    /// building it again. None when the nodes differ.
    pub fn legs_on(
        &self,
        curve: &crate::curves::HazardCurve,
        recoveries: &[f64],
    ) -> Option<Vec<crate::instruments::CdsLegs>> {
        self.prices_on(curve, recoveries.len())
            .then(|| crate::instruments::cds::price_legs_on_plan(&self.plan, recoveries, curve))
    }

    /// As [`BootstrapPlan::legs_on`] with the recovery of contract k given by `recovery(k)` for
    /// `count` contracts, each contract's legs handed to `each` (its index, its legs) in order
    /// instead of collected. Returns false, calling nothing, where `legs_on` gives None.
    pub fn each_legs_on(
        &self,
        curve: &crate::curves::HazardCurve,
        count: usize,
        recovery: impl Fn(usize) -> f64,
        each: impl FnMut(usize, crate::instruments::CdsLegs),
    ) -> bool {
        let same = self.prices_on(curve, count);
        if same {
            crate::instruments::cds::each_legs_on_plan(&self.plan, recovery, curve, each);
        }
        same
    }

    /// Whether `curve` is one this plan's grid prices (its trade date and node times) with
    /// `count` recoveries, one per contract.
    fn prices_on(&self, curve: &crate::curves::HazardCurve, count: usize) -> bool {
        curve.reference() == self.trade
            && curve.node_times().len() == self.node_times.len()
            && curve.node_times().iter().zip(&self.node_times).all(|(a, b)| a.to_bits() == b.to_bits())
            && count == self.plan.contracts.len()
    }

    /// Bootstraps one curve. `quotes[i].tenor` must be the plan's `tenors()[i]`.
    pub fn solve(&self, quotes: &[BootstrapQuote], settings: &BootstrapSettings) -> Result<CurveFit, BootstrapError> {
        if quotes.len() != self.tenors.len()
            || quotes
                .iter()
                .zip(self.tenors.iter().zip(&self.maturities))
                .any(|(q, (t, m))| q.tenor != *t || q.maturity != *m)
        {
            return Err(BootstrapError::PlanMismatch);
        }
        for (i, q) in quotes.iter().enumerate() {
            check_quote(i, q)?;
        }
        let settings = &BootstrapSettings { accrual: self.accrual, ..*settings };
        solve_on_plan(self, quotes, settings)
    }
}

/// Bootstraps the hazard curve of one name on `trade` from `quotes` (any order).
pub fn bootstrap(
    trade: NaiveDate,
    quotes: &[BootstrapQuote],
    discount: &DiscountCurve,
    cal: &Calendar,
    settings: &BootstrapSettings,
) -> Result<CurveFit, BootstrapError> {
    if quotes.is_empty() {
        return Err(BootstrapError::NoQuotes);
    }
    for (i, q) in quotes.iter().enumerate() {
        check_quote(i, q)?;
    }
    let terms: Vec<(Tenor, Option<NaiveDate>)> = quotes.iter().map(BootstrapQuote::term).collect();
    let plan = BootstrapPlan::for_terms(trade, &terms, discount, cal, settings.accrual)?;
    solve_on_plan(&plan, quotes, settings)
}

fn solve_on_plan(
    bp: &BootstrapPlan,
    quotes: &[BootstrapQuote],
    settings: &BootstrapSettings,
) -> Result<CurveFit, BootstrapError> {
    let (mut nodes, mut hazards) = (Vec::with_capacity(quotes.len()), Vec::with_capacity(quotes.len()));
    let curve_failed =
        SCRATCH.with(|s| solve_nodes(bp, quotes, settings, &mut s.borrow_mut(), &mut nodes, &mut hazards));
    let curve = if hazards.is_empty() {
        None
    } else {
        Some(
            HazardCurve::new(bp.trade, bp.node_times[..hazards.len()].to_vec(), hazards)
                .expect("increasing node times and finite hazards"),
        )
    };
    Ok(CurveFit { trade_date: bp.trade, nodes, curve, failed: curve_failed, contracts: bp.contracts.clone() })
}

/// The working vectors of one solve, kept per thread so that the bootstrap of a panel's
/// curves and the quote conversions do not allocate them again for every curve (the values
/// are set afresh each time: the numbers are the same as with new vectors).
#[derive(Default)]
struct Scratch {
    log_q: Vec<f64>,
    pq: Vec<f64>,
    dual_lq: Vec<Dual>,
    dual_pq: Vec<Dual>,
    /// The exponentials' arguments of one Newton step.
    args: Vec<f64>,
    /// The longest contract's terms summed over the solved segments.
    sums: RunningSums,
    /// The accrual-on-default terms of one Newton step.
    aod_terms: Vec<Dual>,
    nodes: Vec<NodeFit>,
    hazards: Vec<f64>,
}

thread_local! {
    static SCRATCH: std::cell::RefCell<Scratch> = std::cell::RefCell::new(Scratch::default());
}

impl BootstrapPlan {
    /// The quoted spread of an upfront quote on this plan's single term: the par spread of the
    /// flat curve (one segment, the fail policy) that reprices `quote`, with `quote.recovery`.
    /// None when that curve cannot be built (the quote needs a negative hazard, or is out of
    /// reach) or the plan has more than one term. The same numbers, bit for bit, as
    /// [`BootstrapPlan::solve`] with [`InfeasiblePolicy::Fail`] followed by
    /// [`BootstrapPlan::legs_on`] and [`crate::instruments::CdsLegs::par_spread`] (a unit
    /// test compares them), without building the fit, the curve and the legs as values.
    pub fn flat_par_spread(&self, quote: &BootstrapQuote, settings: &BootstrapSettings) -> Option<f64> {
        if self.tenors.len() != 1 || quote.tenor != self.tenors[0] || quote.maturity != self.maturities[0] {
            return None;
        }
        check_quote(0, quote).ok()?;
        let settings = &BootstrapSettings { accrual: self.accrual, infeasible: InfeasiblePolicy::Fail, ..*settings };
        SCRATCH.with(|cell| {
            let s = &mut *cell.borrow_mut();
            let (mut nodes, mut hazards) = (std::mem::take(&mut s.nodes), std::mem::take(&mut s.hazards));
            nodes.clear();
            hazards.clear();
            let failed = solve_nodes(self, std::slice::from_ref(quote), settings, s, &mut nodes, &mut hazards);
            let ok = !failed && nodes.iter().all(|n| n.status.usable()) && hazards.len() == 1;
            let spread = ok.then(|| {
                let node = (hazards[0], self.node_times[0]);
                let plan = &self.plan;
                one_node_legs(plan, &plan.contracts[0], quote.recovery, node, &mut s.log_q, &mut s.pq).par_spread()
            });
            s.nodes = nodes;
            s.hazards = hazards;
            spread
        })
    }
}

/// The sequential bootstrap on a plan: pushes one [`NodeFit`] per quote (maturity order) to
/// `nodes` and the solved hazards to `hazards`; returns whether the fail policy stopped the
/// curve.
fn solve_nodes(
    bp: &BootstrapPlan,
    quotes: &[BootstrapQuote],
    settings: &BootstrapSettings,
    scratch: &mut Scratch,
    nodes: &mut Vec<NodeFit>,
    hazards: &mut Vec<f64>,
) -> bool {
    let plan = &bp.plan;
    let node_dates = &bp.node_dates;
    let node_times = &bp.node_times;
    let np = plan.times.len();
    let Scratch { log_q, pq, dual_lq, dual_pq, args, sums, aod_terms, .. } = scratch;
    log_q.clear();
    log_q.resize(np, 0.0);
    pq.clear();
    pq.resize(np, 0.0);
    // Points at t <= 0 have survival 1.
    for (j, p) in pq.iter_mut().enumerate() {
        if plan.times[j] <= 0.0 {
            *p = exp(plan.log_dfs[j]);
        }
    }
    dual_lq.clear();
    dual_lq.resize(np, Dual::constant(0.0));
    dual_pq.clear();
    dual_pq.resize(np, Dual::constant(0.0));

    let (mut t_prev, mut l_prev) = (0.0f64, 0.0f64);
    // The nodes solved here; the last one's segment values are read by no later node.
    let node_count = bp.order.len().min(bp.contracts.len());
    let mut stopped = false;
    let mut curve_failed = false;
    let mut prev_spread: Option<(f64, f64)> = None;
    sums.clear();

    for (k, (qi, contract)) in bp.order.iter().zip(bp.contracts.iter()).enumerate() {
        let q = &quotes[*qi];
        let mut fit = NodeFit {
            quote_index: *qi,
            tenor: q.tenor,
            maturity: contract.maturity,
            node_date: node_dates[k],
            hazard: None,
            survival: None,
            status: NodeStatus::NotCalibrated,
            iterations: 0,
            detail: None,
        };
        if stopped {
            nodes.push(fit);
            continue;
        }
        let terms = &plan.contracts[k];
        debug_assert_eq!(t_prev, if k == 0 { 0.0 } else { node_times[k - 1] }, "the node's cut");
        let cut = &bp.cuts[k];
        let (prot_from, coupon_from) = (cut.prot_from, cut.coupon_from);
        // The part fixed by solved segments: running sums over the longest contract's terms
        // when this contract shares its prefix (same numbers, summed in the same order), else
        // summed here.
        if let Some(last) = plan.contracts.last() {
            sums.extend(plan, last, t_prev, pq, log_q);
        }
        let shared = bp.shares_prefix[k] && prot_from < sums.prot.len() && coupon_from < sums.prem.len();
        let (fp, fm, fa) = if shared {
            (sums.prot[prot_from], sums.prem[coupon_from], sums.aod[coupon_from])
        } else {
            evaluate_terms(plan, &terms.prot[..=prot_from], &terms.coupons[..coupon_from], pq, log_q)
        };
        let (first_point, last_point) = (cut.first_point, cut.last_point);

        let one_minus_r = 1.0 - q.recovery;
        let rebate_pv = terms.rebate01 * terms.cash_settle_df;
        let cs_df = terms.cash_settle_df;
        let quote = q.quote;
        let times = &plan.times;
        let log_dfs = &plan.log_dfs;
        // Points at or before t_prev are fixed by the solved segments: their ln Q and P Q are
        // the ones already computed (the same operations, so the same bits), set once here
        // rather than at every Newton step.
        let moving_from = cut.moving_from;
        for j in first_point..moving_from.min(last_point + 1) {
            dual_lq[j] = Dual::constant(log_q[j]);
            dual_pq[j] = Dual::constant(pq[j]);
        }
        // P Q at the moving points: the arguments first, then their exponentials as one slice
        // (the same values as `(lq + ln P).exp()` point by point, without a call per point).
        let lanes = &cut.layout;
        let points = moving_from..(last_point + 1).max(moving_from);
        let objective = |lambda: f64,
                         dl: &mut [Dual],
                         dpq: &mut [Dual],
                         args: &mut Vec<f64>,
                         aod_terms: &mut Vec<Dual>|
         -> (f64, f64) {
            segment_points(times, log_dfs, points.clone(), (t_prev, l_prev, lambda), dl, dpq, args, Lanes::Detect);
            let (p, m, a) = lanes.evaluate(dpq, dl, aod_terms);
            let prot = (p + fp) * one_minus_r;
            let ann = m + a + (fm + fa - rebate_pv);
            let f = match quote {
                CdsQuote::ParSpread(s) => prot - ann * s,
                CdsQuote::Upfront { upfront, coupon } => prot - ann * coupon - upfront * cs_df,
            };
            (f.v, f.d)
        };
        // Start from the credit triangle on the forward spread between the previous maturity
        // and this one (s_k T_k - s_{k-1} T_{k-1}) / (T_k - T_{k-1}): close to the forward
        // hazard, so Newton needs a step or two fewer than from s_k / (1 - R).
        let t_mat = terms.t_maturity;
        let spread = match quote {
            CdsQuote::ParSpread(s) => s,
            CdsQuote::Upfront { upfront, coupon } => coupon + upfront / q.tenor.years().max(0.25),
        };
        let forward = match prev_spread {
            Some((s0, t0)) if t_mat > t0 => (spread * t_mat - s0 * t0) / (t_mat - t0),
            _ => spread,
        };
        prev_spread = Some((spread, t_mat));
        let guess = (if forward > 0.0 { forward } else { spread } / one_minus_r).clamp(1e-6, settings.max_hazard * 0.5);
        let solved = newton_bracketed(
            |x| objective(x, dual_lq, dual_pq, args, aod_terms),
            guess,
            0.0,
            settings.max_hazard,
            settings.hazard_tolerance,
            settings.max_iterations,
        );
        let target = || describe(quote);
        let lambda = match solved {
            Ok(r) => {
                fit.iterations = r.iterations;
                fit.status = NodeStatus::Ok;
                Some(r.x)
            }
            Err(RootError::BelowLowerBound { f_lo, .. }) => {
                let msg = format!(
                    "{} needs a negative hazard on the segment to {}: at zero hazard the contract is already worth {:.3e} per unit notional to the protection buyer",
                    target(), contract.maturity, f_lo
                );
                fit.detail = Some(msg);
                match settings.infeasible {
                    InfeasiblePolicy::Floor => {
                        fit.status = NodeStatus::Floored;
                        Some(0.0)
                    }
                    InfeasiblePolicy::Fail => {
                        fit.status = NodeStatus::Infeasible;
                        curve_failed = true;
                        None
                    }
                }
            }
            Err(RootError::AboveUpperLimit { limit, f_at_limit }) => {
                fit.status = NodeStatus::Infeasible;
                fit.detail = Some(format!(
                    "{} is out of reach: even a hazard of {limit} per year on the segment to {} leaves the contract short by {:.3e} per unit notional",
                    target(), contract.maturity, -f_at_limit
                ));
                if settings.infeasible == InfeasiblePolicy::Fail {
                    curve_failed = true;
                }
                None
            }
            Err(e) => {
                fit.status = NodeStatus::Failed;
                fit.detail =
                    Some(format!("{}: root search on the segment to {} failed: {e}", target(), contract.maturity));
                if settings.infeasible == InfeasiblePolicy::Fail {
                    curve_failed = true;
                }
                None
            }
        };
        match lambda {
            Some(lam) => {
                let t_k = node_times[k];
                // The segment's ln Q and P Q, for the nodes after this one (the running sums
                // and the fixed part of their legs); the last node's are read by none (the
                // callers read only the nodes and hazards), so they are not computed.
                if k + 1 < node_count {
                    let segment = cut.segment.clone();
                    for j in segment.clone() {
                        log_q[j] = l_prev - lam * (plan.times[j] - t_prev);
                        pq[j] = log_q[j] + plan.log_dfs[j];
                    }
                    exp_in_place(&mut pq[segment]);
                }
                fit.hazard = Some(lam);
                fit.survival = Some(exp(l_prev - lam * (terms.t_maturity - t_prev)));
                hazards.push(lam);
                l_prev -= lam * (t_k - t_prev);
                t_prev = t_k;
            }
            None => stopped = true,
        }
        nodes.push(fit);
    }

    if curve_failed {
        for n in nodes.iter_mut().filter(|n| n.status.usable()) {
            n.status = NodeStatus::CurveFailed;
        }
    }
    curve_failed
}

fn describe(q: CdsQuote) -> String {
    match q {
        CdsQuote::ParSpread(s) => format!("par spread {:.4} bp", s * 1e4),
        CdsQuote::Upfront { upfront, coupon } => {
            format!("upfront {:.6} with running coupon {:.2} bp", upfront, coupon * 1e4)
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::time::Calendar;

    /// `flat_par_spread` is `solve` (fail policy) + `legs_on` + `par_spread`, bit for bit: over
    /// tenors from 6M to 10Y and an off-roll maturity, upfronts from deep negative (no
    /// non-negative hazard reprices them: both give None) to 60%, coupons, recoveries, a flat
    /// and a sloped discount curve with pillars inside the contracts, all accrual variants.
    #[test]
    fn flat_par_spread_is_the_solve_and_the_legs() {
        let t = NaiveDate::from_ymd_opt(2024, 3, 20).unwrap();
        let cal = Calendar::weekends_only();
        let curves = crate::curves::discount::test_curves(t);
        let mut terms: Vec<(Tenor, Option<NaiveDate>)> =
            [6, 12, 36, 60, 84, 120].iter().map(|&m| (Tenor::from_months(m).unwrap(), None)).collect();
        terms.push((Tenor::from_months(60).unwrap(), NaiveDate::from_ymd_opt(2029, 1, 31)));
        let (mut some, mut none) = (0, 0);
        for d in &curves {
            for accrual in [AccrualIntegration::Standard, AccrualIntegration::Exact, AccrualIntegration::Published] {
                for &(tenor, maturity) in &terms {
                    let plan = BootstrapPlan::for_terms(t, &[(tenor, maturity)], d, &cal, accrual).unwrap();
                    for upfront in [-0.4, -0.02, 0.0, 0.013, 0.1, 0.6] {
                        for (coupon, recovery) in [(0.01, 0.4), (0.05, 0.25), (0.0, 0.6)] {
                            let q = BootstrapQuote {
                                tenor,
                                quote: CdsQuote::Upfront { upfront, coupon },
                                recovery,
                                maturity,
                            };
                            let settings = BootstrapSettings::default();
                            let slow = plan
                                .solve(&[q], &BootstrapSettings { infeasible: InfeasiblePolicy::Fail, ..settings })
                                .ok()
                                .filter(|f| !f.failed && f.complete())
                                .and_then(|f| plan.legs_on(f.curve.as_ref()?, &[recovery]))
                                .map(|l| l[0].par_spread());
                            let fast = plan.flat_par_spread(&q, &settings);
                            assert_eq!(slow.map(f64::to_bits), fast.map(f64::to_bits), "{q:?} {accrual:?}");
                            if fast.is_some() {
                                some += 1;
                            } else {
                                none += 1;
                            }
                        }
                    }
                }
            }
        }
        assert!(some > 500 && none > 20, "{some} converted, {none} not");
        // A plan of two terms has no single flat spread.
        let two = BootstrapPlan::for_terms(t, &terms[..2], &curves[0], &cal, AccrualIntegration::Standard).unwrap();
        let q = BootstrapQuote {
            tenor: terms[0].0,
            quote: CdsQuote::Upfront { upfront: 0.01, coupon: 0.01 },
            recovery: 0.4,
            maturity: None,
        };
        assert_eq!(two.flat_par_spread(&q, &BootstrapSettings::default()), None);
    }
}
