//! The standard single-name CDS contract and its legs, priced the way the published standard
//! model prices it: closed-form integration on the joint grid of discount and hazard nodes,
//! accrual on default split at every node of both curves with the half-day term (the default
//! variant, [`AccrualIntegration::Published`]; `Standard` and `Exact` are kept, see there and
//! docs/cds-conventions.md), and the series expansion when the exponent is tiny.
//!
//! Notation (per unit notional, trade date T = valuation date = the curves' reference date):
//! P = discount factor, Q = survival, t = Act/365F years from T. On a sub-interval [t0, t1],
//! f = ln P0 - ln P1, h = ln Q0 - ln Q1, x = f + h.
//!
//! * Protection: sum over node intervals from T to maturity of h/x (P0Q0 - P1Q1), times (1 - R).
//! * Premium: each coupon paid after T + 1 pays c x accrual x P(pay) x Q(pay - 1 day).
//! * Accrual on default: for each coupon whose accrual ends after T + 1, on the span
//!   [max(start, T + 1) - 1 day, pay - 1 day] (split at every node inside it, or one interval
//!   in the `Standard` variant) with t_s = t(start - 1 day), less 1/730 in the `Published`
//!   variant: sum over its intervals of
//!   (h/x) [ (t1 - t0)((P0Q0 - P1Q1)/x - P1Q1) + (t0 - t_s)(P0Q0 - P1Q1) ] x c x 365/360.
//! * Accrual rebate: the first coupon's accrual from its start to T + 1, paid at cash
//!   settlement (T + 3 business days) without survival.
//!
//! This module is pure: curves in, numbers out. The plan that maps a contract onto the
//! node grid is built once and shared by the bootstrap, which evaluates it with dual numbers.

use crate::curves::{DiscountCurve, HazardCurve};
use crate::math::Scalar;
use crate::time::imm::{cds_maturity, MaturityError};
use crate::time::schedule::{cds_schedule, CouponPeriod};
use crate::time::{add_days, Calendar, Tenor};
use chrono::NaiveDate;

/// Below this exponent the closed forms switch to their series expansion (the standard
/// model's numerical fix).
pub const SERIES_THRESHOLD: f64 = 1e-4;

/// How accrual on default is integrated inside a coupon period.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum AccrualIntegration {
    /// The published standard model (the default): the integral split at every discount and
    /// hazard node inside the coupon period, with the half-day term: the accrued amount at a
    /// default runs from half a day before the period's start. What QuantLib's standard-model engine
    /// computes with its default options (Taylor fix, half-day bias, piecewise forwards), and
    /// what reproduces the upfronts published with that engine's tests.
    #[default]
    Published,
    /// One interval per coupon period, forwards flat inside it, no half-day term.
    Standard,
    /// Split at every discount and hazard node inside the period, no half-day term (exact for
    /// the curves with the accrued amount linear from the period's start).
    Exact,
}
crate::text_form!(AccrualIntegration { Published => "published", Standard => "standard", Exact => "exact" });

/// How a CDS is quoted.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum CdsQuote {
    /// Par spread as a decimal (100 bp = 0.01).
    ParSpread(f64),
    /// Clean upfront as a fraction of notional (positive when the protection buyer pays),
    /// with the running coupon as a decimal.
    Upfront { upfront: f64, coupon: f64 },
}

/// The terms of a standard CDS traded on `trade_date`.
#[derive(Debug, Clone, PartialEq)]
pub struct CdsContract {
    pub trade_date: NaiveDate,
    pub maturity: NaiveDate,
    /// T + 1 calendar day.
    pub protection_start: NaiveDate,
    /// T + 3 business days.
    pub cash_settlement: NaiveDate,
    pub periods: Vec<CouponPeriod>,
}

impl CdsContract {
    /// The standard contract of `tenor` traded on `trade_date` (semi-annual roll).
    pub fn standard(trade_date: NaiveDate, tenor: Tenor, cal: &Calendar) -> Result<CdsContract, MaturityError> {
        let maturity = cds_maturity(trade_date, tenor)?;
        Ok(CdsContract::with_maturity(trade_date, maturity, cal))
    }

    /// The standard contracts of several tenors traded on the same day, sharing one schedule
    /// computation (see [`crate::time::schedule::cds_schedules`]).
    pub fn standard_set(
        trade_date: NaiveDate,
        tenors: &[Tenor],
        cal: &Calendar,
    ) -> Vec<Result<CdsContract, MaturityError>> {
        let terms: Vec<(Tenor, Option<NaiveDate>)> = tenors.iter().map(|&t| (t, None)).collect();
        CdsContract::term_set(trade_date, &terms, cal)
    }

    /// As [`CdsContract::standard_set`], a term's maturity replacing its tenor's standard roll
    /// where it is given (a contract off the standard roll; its schedule as
    /// [`CdsContract::with_maturity`] builds it).
    pub fn term_set(
        trade_date: NaiveDate,
        terms: &[(Tenor, Option<NaiveDate>)],
        cal: &Calendar,
    ) -> Vec<Result<CdsContract, MaturityError>> {
        let mats: Vec<Result<NaiveDate, MaturityError>> =
            terms.iter().map(|&(t, m)| m.map_or_else(|| cds_maturity(trade_date, t), Ok)).collect();
        let ok: Vec<NaiveDate> = mats.iter().filter_map(|m| m.as_ref().ok().copied()).collect();
        let mut schedules = crate::time::schedule::cds_schedules(trade_date, &ok, cal).into_iter();
        let protection_start = add_days(trade_date, 1);
        let cash_settlement = cal.add_business_days(trade_date, 3);
        mats.into_iter()
            .map(|m| {
                m.map(|maturity| CdsContract {
                    trade_date,
                    maturity,
                    protection_start,
                    cash_settlement,
                    periods: schedules.next().expect("one schedule per maturity"),
                })
            })
            .collect()
    }

    /// A contract to a given unadjusted maturity: coupons on the quarterly IMM dates from the
    /// step-in, the maturity ending the last period (a short stub when it is not an IMM date).
    pub fn with_maturity(trade_date: NaiveDate, maturity: NaiveDate, cal: &Calendar) -> CdsContract {
        CdsContract {
            trade_date,
            maturity,
            protection_start: add_days(trade_date, 1),
            cash_settlement: cal.add_business_days(trade_date, 3),
            periods: cds_schedule(trade_date, maturity, cal),
        }
    }

    /// Accrual fraction (days/360 per unit coupon) repaid to the buyer at settlement: from the
    /// start of the first coupon paid after T + 1 to T + 1; zero when that accrual starts after T.
    pub fn rebate_accrual(&self) -> f64 {
        let first = self.periods.iter().find(|p| p.payment > self.protection_start);
        match first {
            Some(p) if p.accrual_start <= self.trade_date => {
                (self.protection_start - p.accrual_start).num_days() as f64 / 360.0
            }
            _ => 0.0,
        }
    }
}

/// Leg values of one contract per unit notional at T, before any running coupon is applied.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CdsLegs {
    /// (1 - R) x the default-density integral.
    pub protection: f64,
    /// Premium leg per unit running coupon (coupons paid, no accrual on default).
    pub premium01: f64,
    /// Accrual on default per unit running coupon.
    pub accrual_on_default01: f64,
    /// Accrual rebate per unit running coupon, undiscounted (paid at cash settlement).
    pub rebate01: f64,
    /// Discount factor to cash settlement.
    pub cash_settle_df: f64,
}

impl CdsLegs {
    /// Clean risky annuity at T: premium + accrual on default - rebate discounted to T.
    pub fn risky_annuity(&self) -> f64 {
        self.premium01 + self.accrual_on_default01 - self.rebate01 * self.cash_settle_df
    }

    /// Par spread (decimal): the running coupon that makes the clean upfront zero.
    pub fn par_spread(&self) -> f64 {
        self.protection / self.risky_annuity()
    }

    /// Clean upfront at cash settlement for running coupon `coupon` (decimal), positive when
    /// the protection buyer pays.
    pub fn upfront(&self, coupon: f64) -> f64 {
        (self.protection - coupon * self.risky_annuity()) / self.cash_settle_df
    }

    /// Running coupon implied by an upfront: the inverse of [`CdsLegs::upfront`] in the coupon.
    pub fn coupon_from_upfront(&self, upfront: f64) -> f64 {
        (self.protection - upfront * self.cash_settle_df) / self.risky_annuity()
    }

    /// The quote this contract has under the curves it was priced on, in the form of `like`.
    pub fn reprice(&self, like: CdsQuote) -> CdsQuote {
        match like {
            CdsQuote::ParSpread(_) => CdsQuote::ParSpread(self.par_spread()),
            CdsQuote::Upfront { coupon, .. } => CdsQuote::Upfront { upfront: self.upfront(coupon), coupon },
        }
    }
}

/// One coupon's part of the premium and accrual-on-default legs on the grid.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct CouponTerm {
    /// Accrual fraction per unit coupon.
    pub accrual: f64,
    /// P(pay) / P(pay - 1 day): turns P Q at the survival point into P(pay) Q(pay - 1).
    pub pay_df_ratio: f64,
    /// Grid point of pay - 1 day (survival for the premium, end of the accrual-on-default span).
    pub q_idx: u32,
    /// t(accrual start - 1 day), less half a day (1/730) with the half-day term.
    pub t_s: f64,
    /// Range into `aod_path` of the grid points the accrual-on-default integral runs over;
    /// empty when the accrual ends on or before T + 1.
    pub aod_from: u32,
    pub aod_to: u32,
    /// False for a coupon paid on or before T + 1 (contributes nothing).
    pub paid: bool,
}

/// One contract mapped onto the grid.
#[derive(Debug, Clone)]
pub(crate) struct ContractTerms {
    /// Consecutive protection node points; intervals are (prot[i], prot[i+1]).
    pub prot: Vec<u32>,
    pub coupons: Vec<CouponTerm>,
    pub rebate01: f64,
    pub cash_settle_df: f64,
    /// Time of the maturity point.
    pub t_maturity: f64,
}

/// The grid shared by a set of contracts on one trade date: point times and ln DF.
#[derive(Debug, Clone)]
pub(crate) struct LegPlan {
    pub times: Vec<f64>,
    pub log_dfs: Vec<f64>,
    /// Flattened accrual-on-default paths (point indices).
    pub aod_path: Vec<u32>,
    pub contracts: Vec<ContractTerms>,
}

#[inline]
fn point(times: &[f64], t: f64) -> u32 {
    let i = times.partition_point(|&x| x < t);
    debug_assert!(i < times.len() && times[i] == t, "grid point {t} missing");
    i as u32
}

impl LegPlan {
    /// Maps `contracts` (all traded on `trade`) onto the joint grid of the discount pillars and
    /// the hazard node times `hazard_nodes`.
    pub fn build(
        trade: NaiveDate,
        contracts: &[&CdsContract],
        discount: &DiscountCurve,
        hazard_nodes: &[f64],
        mode: AccrualIntegration,
    ) -> LegPlan {
        // Dates become integer day offsets from T once; t = offset / 365 is then the same
        // number `year_time` gives, without calendar arithmetic in the loops below.
        let t0 = crate::time::serial(trade);
        let off = |d: NaiveDate| crate::time::serial(d) - t0;
        let tt = |o: i32| o as f64 / 365.0;
        struct Offsets {
            start: i32,
            end: i32,
            pay: i32,
        }
        let per: Vec<(i32, Vec<Offsets>)> = contracts
            .iter()
            .map(|c| {
                (
                    off(c.maturity),
                    c.periods
                        .iter()
                        .map(|p| Offsets { start: off(p.accrual_start), end: off(p.accrual_end), pay: off(p.payment) })
                        .collect(),
                )
            })
            .collect();
        // Protection starts on T + 1 (offset 1).
        let eff = 1;
        // The grid reaches the last maturity or the last accrual-on-default end (pay - 1 day,
        // after the maturity when it falls on a weekend), whichever is later.
        let t_last = per
            .iter()
            .flat_map(|(m, ps)| std::iter::once(*m).chain(ps.last().map(|p| p.pay - 1)))
            .max()
            .map_or(0.0, tt);
        let t_eff = tt(eff);

        let mut node_times: Vec<f64> = discount
            .pillar_dates()
            .iter()
            .map(|&d| tt(off(d)))
            .chain(hazard_nodes.iter().copied())
            .filter(|&t| t > t_eff && t <= t_last)
            .collect();
        node_times.sort_unstable_by(f64::total_cmp);
        node_times.dedup();

        // Coupon points as integer offsets; contracts of one trade date share their schedule
        // prefixes, so a period equal to the previous contract's is not collected again.
        let mut days: Vec<i32> = Vec::with_capacity(64);
        days.push(0);
        for (k, (m, ps)) in per.iter().enumerate() {
            days.push(*m);
            let prev = if k > 0 { Some(&per[k - 1].1) } else { None };
            for (j, p) in ps.iter().enumerate() {
                if let Some(q) = prev.and_then(|v| v.get(j)) {
                    if q.start == p.start && q.end == p.end && q.pay == p.pay {
                        continue;
                    }
                }
                if p.pay > eff {
                    days.push(p.pay - 1);
                }
                if p.end > eff {
                    days.push(p.start.max(eff) - 1);
                }
            }
        }
        days.sort_unstable();
        days.dedup();
        let mut times: Vec<f64> = Vec::with_capacity(days.len() + node_times.len());
        let (mut a, mut b) = (0, 0);
        while a < days.len() || b < node_times.len() {
            let x = days.get(a).map_or(f64::INFINITY, |&d| tt(d));
            let y = node_times.get(b).copied().unwrap_or(f64::INFINITY);
            let next = if x <= y {
                a += 1;
                if x == y {
                    b += 1;
                }
                x
            } else {
                b += 1;
                y
            };
            times.push(next);
        }
        // ln DF at each point, walking the sorted points once.
        let log_dfs: Vec<f64> = times.iter().map(|&t| discount.log_df_at(t)).collect();

        let mut aod_path: Vec<u32> = Vec::new();
        let mut out = Vec::with_capacity(contracts.len());
        for (c, (m, ps)) in contracts.iter().zip(&per) {
            let t_mat = tt(*m);
            let mut prot = Vec::with_capacity(node_times.len() + 2);
            prot.push(0u32);
            for &t in node_times.iter().take_while(|&&t| t < t_mat) {
                prot.push(point(&times, t));
            }
            prot.push(point(&times, t_mat));

            let mut coupons = Vec::with_capacity(ps.len());
            for (p, cp) in ps.iter().zip(&c.periods) {
                let paid = p.pay > eff;
                let q_idx = if paid { point(&times, tt(p.pay - 1)) } else { 0 };
                let pay_df_ratio =
                    if paid { (discount.log_df_at(tt(p.pay)) - log_dfs[q_idx as usize]).exp() } else { 0.0 };
                let from = aod_path.len() as u32;
                if p.end > eff && paid {
                    let t0 = tt(p.start.max(eff) - 1);
                    let t1 = tt(p.pay - 1);
                    aod_path.push(point(&times, t0));
                    if mode != AccrualIntegration::Standard {
                        for &t in node_times.iter().filter(|&&t| t > t0 && t < t1) {
                            aod_path.push(point(&times, t));
                        }
                    }
                    aod_path.push(q_idx);
                }
                // The half-day term starts the accrued amount's clock half a day earlier.
                let t_s = tt(p.start - 1) - if mode == AccrualIntegration::Published { HALF_DAY } else { 0.0 };
                coupons.push(CouponTerm {
                    accrual: cp.accrual_fraction(),
                    pay_df_ratio,
                    q_idx,
                    t_s,
                    aod_from: from,
                    aod_to: aod_path.len() as u32,
                    paid,
                });
            }
            out.push(ContractTerms {
                prot,
                coupons,
                rebate01: c.rebate_accrual(),
                cash_settle_df: discount.df_at(tt(off(c.cash_settlement))),
                t_maturity: t_mat,
            });
        }
        LegPlan { times, log_dfs, aod_path, contracts: out }
    }
}

/// The protection integral term of one interval (without 1 - R), given P Q at both ends.
#[inline]
pub(crate) fn protection_term<S: Scalar>(a0: S, a1: S, f: f64, h: S) -> S {
    let x = h + f;
    if x.value() < SERIES_THRESHOLD {
        a0 * h * (((((x * (1.0 / 120.0)) - 1.0 / 24.0) * x + 1.0 / 6.0) * x - 0.5) * x + 1.0)
    } else {
        h / x * (a0 - a1)
    }
}

/// The accrual-on-default term of one interval (per unit coupon, before the 365/360 factor).
#[inline]
pub(crate) fn accrual_term<S: Scalar>(a0: S, a1: S, f: f64, h: S, t0: f64, t1: f64, t_s: f64) -> S {
    accrual_term_spans(a0, a1, f, h, t1 - t0, t0 - t_s)
}

/// [`accrual_term`] with the interval's length `dt` = t1 - t0 and its lead `lead` = t0 - t_s
/// already formed.
#[inline]
pub(crate) fn accrual_term_spans<S: Scalar>(a0: S, a1: S, f: f64, h: S, dt: f64, lead: f64) -> S {
    let x = h + f;
    if x.value() < SERIES_THRESHOLD {
        let s1 = (((x * (-1.0 / 24.0)) + 1.0 / 6.0) * x - 0.5) * x + 1.0;
        let s2 = (((x * (-1.0 / 30.0)) + 1.0 / 8.0) * x - 1.0 / 3.0) * x + 0.5;
        h * a0 * (s1 * lead + s2 * dt)
    } else {
        let diff = a0 - a1;
        h / x * ((diff / x - a1) * dt + diff * lead)
    }
}

/// Protection (without 1 - R), premium01 and accrual-on-default01 of the protection nodes
/// `prot` (consecutive points, intervals between neighbours) and the coupons `coupons`, with
/// P Q and ln Q supplied per grid point.
#[inline]
pub(crate) fn evaluate_terms<S: Scalar>(
    plan: &LegPlan,
    prot: &[u32],
    coupons: &[CouponTerm],
    pq: &[S],
    log_q: &[S],
) -> (S, S, S) {
    let zero = S::constant(0.0);
    let mut prot_sum = zero;
    for w in prot.windows(2) {
        let (i0, i1) = (w[0] as usize, w[1] as usize);
        let f = plan.log_dfs[i0] - plan.log_dfs[i1];
        let h = log_q[i0] - log_q[i1];
        prot_sum = prot_sum + protection_term(pq[i0], pq[i1], f, h);
    }
    let mut prem = zero;
    let mut aod = zero;
    for c in coupons {
        add_coupon(plan, c, pq, log_q, &mut prem, &mut aod);
    }
    (prot_sum, prem, aod)
}

/// Adds one coupon's premium01 and accrual-on-default01 to the running sums `prem` and `aod`
/// (a coupon not paid adds nothing): the step of [`evaluate_terms`]' coupon loop, so that a
/// caller summing the coupons itself gets the same numbers, bit for bit.
#[inline]
pub(crate) fn add_coupon<S: Scalar>(plan: &LegPlan, c: &CouponTerm, pq: &[S], log_q: &[S], prem: &mut S, aod: &mut S) {
    if !c.paid {
        return;
    }
    *prem = *prem + pq[c.q_idx as usize] * (c.accrual * c.pay_df_ratio);
    let path = &plan.aod_path[c.aod_from as usize..c.aod_to as usize];
    let mut acc = S::constant(0.0);
    for w in path.windows(2) {
        let (i0, i1) = (w[0] as usize, w[1] as usize);
        let f = plan.log_dfs[i0] - plan.log_dfs[i1];
        let h = log_q[i0] - log_q[i1];
        acc = acc + accrual_term(pq[i0], pq[i1], f, h, plan.times[i0], plan.times[i1], c.t_s);
    }
    *aod = *aod + acc * c.accrual_factor();
}

impl CouponTerm {
    /// Whether `self` and `other`, two coupons of `plan`'s contracts, add the same terms to the
    /// legs at every survival curve: equal fields (bit for bit) and the same grid points on
    /// their accrual-on-default paths (each contract has its own range of `aod_path`).
    pub(crate) fn same_terms(&self, other: &CouponTerm, plan: &LegPlan) -> bool {
        let path = |c: &CouponTerm| &plan.aod_path[c.aod_from as usize..c.aod_to as usize];
        self.paid == other.paid
            && self.q_idx == other.q_idx
            && self.accrual.to_bits() == other.accrual.to_bits()
            && self.pay_df_ratio.to_bits() == other.pay_df_ratio.to_bits()
            && self.t_s.to_bits() == other.t_s.to_bits()
            && path(self) == path(other)
    }

    /// 365/360 turns the Act/365F time integral into Act/360 accrual.
    pub(crate) const ACCRUAL_FACTOR: f64 = 365.0 / 360.0;

    /// [`CouponTerm::ACCRUAL_FACTOR`].
    #[inline]
    pub(crate) fn accrual_factor(&self) -> f64 {
        Self::ACCRUAL_FACTOR
    }
}

/// Half a day in Act/365F years: the standard model's half-day term.
const HALF_DAY: f64 = 1.0 / 730.0;

/// The curves handed to [`price_legs`] are not referenced on the trade date.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error(
    "curves must be referenced on the trade date {trade}: discount curve is on {discount}, hazard curve on {hazard}"
)]
pub struct ReferenceDateMismatch {
    pub trade: NaiveDate,
    pub discount: NaiveDate,
    pub hazard: NaiveDate,
}

/// Prices the legs of several contracts traded on the same day, with their recoveries, on one
/// joint grid of the discount pillars, the hazard nodes and every contract's dates (as the
/// bootstrap's shared plan does): the grid and the survival and discount values on it are
/// built once instead of once per contract.
pub fn price_legs_set(
    contracts: &[&CdsContract],
    recoveries: &[f64],
    discount: &DiscountCurve,
    hazard: &HazardCurve,
    mode: AccrualIntegration,
) -> Result<Vec<CdsLegs>, ReferenceDateMismatch> {
    let Some(first) = contracts.first() else { return Ok(Vec::new()) };
    let trade = first.trade_date;
    if discount.reference() != trade || hazard.reference() != trade || contracts.iter().any(|c| c.trade_date != trade) {
        let other = contracts.iter().map(|c| c.trade_date).find(|d| *d != trade).unwrap_or(trade);
        return Err(ReferenceDateMismatch { trade: other, discount: discount.reference(), hazard: hazard.reference() });
    }
    let plan = LegPlan::build(trade, contracts, discount, hazard.node_times(), mode);
    Ok(price_legs_on_plan(&plan, recoveries, hazard))
}

/// The legs of every contract of `plan` (built for `hazard`'s node times) on `hazard`: the
/// last step of [`price_legs_set`], for a caller that already holds the plan (the bootstrap's
/// shared plan reprices the curves it built without building the grid again).
pub(crate) fn price_legs_on_plan(plan: &LegPlan, recoveries: &[f64], hazard: &HazardCurve) -> Vec<CdsLegs> {
    let mut legs = Vec::with_capacity(plan.contracts.len());
    each_legs_on_plan(plan, |k| recoveries[k], hazard, |_, l| legs.push(l));
    legs
}

/// The legs [`price_legs_on_plan`] gives, handed to `each` contract by contract (index in
/// `plan.contracts`, legs) instead of collected; the curve's ln S and P S on the plan's grid
/// go into vectors this thread keeps from one call to the next (repricing runs once per curve).
/// `each` must not price on a plan itself: the kept vectors are in use while it runs.
pub(crate) fn each_legs_on_plan(
    plan: &LegPlan,
    recovery: impl Fn(usize) -> f64,
    hazard: &HazardCurve,
    mut each: impl FnMut(usize, CdsLegs),
) {
    thread_local! {
        static GRID: std::cell::RefCell<(Vec<f64>, Vec<f64>)> = const { std::cell::RefCell::new((Vec::new(), Vec::new())) };
    }
    GRID.with(|cell| {
        let (log_q, pq) = &mut *cell.borrow_mut();
        hazard.log_survival_at_sorted_into(&plan.times, log_q);
        pq.clear();
        pq.extend(plan.log_dfs.iter().zip(log_q.iter()).map(|(p, q)| p + q));
        crate::math::exp::exp_in_place(pq);
        for (k, terms) in plan.contracts.iter().enumerate() {
            each(k, terms_legs(plan, terms, recovery(k), pq, log_q));
        }
    })
}

/// The legs of `terms` (a contract of `plan`) on the one-node hazard curve of hazard `h` and
/// node time `t1`: the numbers [`price_legs_on_plan`] gives on that curve (its ln S(t) as
/// [`HazardCurve::one_segment_log_survival`] computes it), into `log_q` and `pq` kept by the
/// caller instead of a curve and new vectors (flat solves price many hazards).
pub(crate) fn one_node_legs(
    plan: &LegPlan,
    terms: &ContractTerms,
    recovery: f64,
    (h, t1): (f64, f64),
    log_q: &mut Vec<f64>,
    pq: &mut Vec<f64>,
) -> CdsLegs {
    log_q.clear();
    log_q.extend(plan.times.iter().map(|&t| HazardCurve::one_segment_log_survival(h, t1, t)));
    pq.clear();
    pq.extend(plan.log_dfs.iter().zip(log_q.iter()).map(|(p, q)| p + q));
    crate::math::exp::exp_in_place(pq);
    terms_legs(plan, terms, recovery, pq, log_q)
}

/// The protection term of the interval (i0, i1), as [`evaluate_terms`] computes it on `f64`.
#[inline]
fn window_term(plan: &LegPlan, i0: usize, i1: usize, pq: &[f64], log_q: &[f64]) -> f64 {
    protection_term(pq[i0], pq[i1], plan.log_dfs[i0] - plan.log_dfs[i1], log_q[i0] - log_q[i1])
}

/// The premium and accrual-on-default terms of coupon `c`, as [`evaluate_terms`] adds them on
/// `f64`.
#[inline]
fn coupon_terms(plan: &LegPlan, c: &CouponTerm, pq: &[f64], log_q: &[f64]) -> (f64, f64) {
    let prem = pq[c.q_idx as usize] * (c.accrual * c.pay_df_ratio);
    let mut acc = 0.0;
    for w in plan.aod_path[c.aod_from as usize..c.aod_to as usize].windows(2) {
        let (i0, i1) = (w[0] as usize, w[1] as usize);
        let f = plan.log_dfs[i0] - plan.log_dfs[i1];
        let h = log_q[i0] - log_q[i1];
        acc += accrual_term(pq[i0], pq[i1], f, h, plan.times[i0], plan.times[i1], c.t_s);
    }
    (prem, acc * c.accrual_factor())
}

/// Running sums of one contract's terms: entry i of each holds the sum of its first i
/// protection intervals (`prot`) or first i coupons (`prem`, `aod`; unpaid coupons add nothing),
/// added in [`evaluate_terms`]' order, so that a contract sharing these terms takes its sums
/// from here (the bootstrap sums the longest contract over the segments it has solved).
#[derive(Debug, Clone)]
pub(crate) struct RunningSums {
    pub prot: Vec<f64>,
    pub prem: Vec<f64>,
    pub aod: Vec<f64>,
}

impl Default for RunningSums {
    fn default() -> Self {
        RunningSums { prot: vec![0.0], prem: vec![0.0], aod: vec![0.0] }
    }
}

impl RunningSums {
    /// Back to the sums of no terms.
    pub(crate) fn clear(&mut self) {
        for v in [&mut self.prot, &mut self.prem, &mut self.aod] {
            v.clear();
            v.push(0.0);
        }
    }

    /// Extends the sums over the next intervals and coupons of `terms` whose grid points all
    /// lie at or before `t_limit` (P Q and ln Q known there).
    pub(crate) fn extend(&mut self, plan: &LegPlan, terms: &ContractTerms, t_limit: f64, pq: &[f64], log_q: &[f64]) {
        while self.prot.len() < terms.prot.len() {
            let w = self.prot.len() - 1;
            let (i0, i1) = (terms.prot[w] as usize, terms.prot[w + 1] as usize);
            if plan.times[i1] > t_limit {
                break;
            }
            let next = self.prot[w] + window_term(plan, i0, i1, pq, log_q);
            self.prot.push(next);
        }
        while self.prem.len() <= terms.coupons.len() {
            let j = self.prem.len() - 1;
            let c = &terms.coupons[j];
            let (m, a) = (self.prem[j], self.aod[j]);
            if !c.paid {
                self.prem.push(m);
                self.aod.push(a);
                continue;
            }
            if plan.times[c.q_idx as usize] > t_limit {
                break;
            }
            let (dm, da) = coupon_terms(plan, c, pq, log_q);
            self.prem.push(m + dm);
            self.aod.push(a + da);
        }
    }
}

/// The legs of one contract of `plan` with P Q and ln Q given at every grid point.
pub(crate) fn terms_legs(plan: &LegPlan, terms: &ContractTerms, recovery: f64, pq: &[f64], log_q: &[f64]) -> CdsLegs {
    let (prot, prem, aod) = evaluate_terms(plan, &terms.prot, &terms.coupons, pq, log_q);
    CdsLegs {
        protection: (1.0 - recovery) * prot,
        premium01: prem,
        accrual_on_default01: aod,
        rebate01: terms.rebate01,
        cash_settle_df: terms.cash_settle_df,
    }
}

/// Prices the legs of `contract` on curves referenced on its trade date.
pub fn price_legs(
    contract: &CdsContract,
    recovery: f64,
    discount: &DiscountCurve,
    hazard: &HazardCurve,
    mode: AccrualIntegration,
) -> Result<CdsLegs, ReferenceDateMismatch> {
    let trade = contract.trade_date;
    if discount.reference() != trade || hazard.reference() != trade {
        return Err(ReferenceDateMismatch { trade, discount: discount.reference(), hazard: hazard.reference() });
    }
    let plan = LegPlan::build(trade, &[contract], discount, hazard.node_times(), mode);
    Ok(price_legs_on_plan(&plan, &[recovery], hazard)[0])
}

/// The quoted-spread convention: a quote given as a spread `s` stands for the flat hazard at
/// which the contract's par spread is `s` (at the quote's recovery), and trades as the upfront
/// that flat curve gives at the running coupon. Common practice for standard contracts (the
/// values published with QuantLib's test suite, testIsdaEngine, are upfronts converted this
/// way; tests/all/reference_quantlib.rs reproduces them).
pub mod quoted_spread {
    use super::{AccrualIntegration, CdsContract, CdsLegs, LegPlan};
    use crate::curves::{DiscountCurve, HazardCurve};

    /// The flat hazard at which `value(h)` reaches `target` (value rising in h), bisected on
    /// [0, 50] per year to the last bit; None when no hazard there reaches it.
    fn flat_hazard(target: f64, value: impl Fn(f64) -> f64) -> Option<f64> {
        let (mut lo, mut hi) = (0.0f64, 50.0f64);
        if !(value(lo) <= target && value(hi) >= target) {
            return None;
        }
        for _ in 0..200 {
            let mid = 0.5 * (lo + hi);
            if mid <= lo || mid >= hi {
                break;
            }
            if value(mid) < target {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        Some(0.5 * (lo + hi))
    }

    /// The legs of one contract on flat hazard curves: its grid built once (a flat curve's
    /// one node is always at t = 1, so the grid does not change with the hazard), then at each
    /// hazard the numbers [`super::price_legs`] gives on [`HazardCurve::flat`].
    struct FlatLegs {
        plan: LegPlan,
        recovery: f64,
        /// The survival values at the grid's times and their discounted products, reused by
        /// each hazard priced (a conversion prices about sixty).
        scratch: std::cell::RefCell<(Vec<f64>, Vec<f64>)>,
    }

    impl FlatLegs {
        /// None when the discount curve is not referenced on the trade date (as `price_legs`).
        fn new(
            contract: &CdsContract,
            recovery: f64,
            discount: &DiscountCurve,
            accrual: AccrualIntegration,
        ) -> Option<Self> {
            let trade = contract.trade_date;
            let flat = HazardCurve::flat(trade, 0.0);
            (discount.reference() == trade).then(|| FlatLegs {
                plan: LegPlan::build(trade, &[contract], discount, flat.node_times(), accrual),
                recovery,
                scratch: Default::default(),
            })
        }

        /// The legs on `HazardCurve::flat(trade, h)` (one node at t = 1), without building
        /// the curve and the vectors at each hazard ([`super::one_node_legs`]).
        fn at(&self, h: f64) -> CdsLegs {
            debug_assert!(h.is_finite(), "a flat hazard is finite");
            let mut scratch = self.scratch.borrow_mut();
            let (log_q, pq) = &mut *scratch;
            super::one_node_legs(&self.plan, &self.plan.contracts[0], self.recovery, (h, 1.0), log_q, pq)
        }
    }

    /// The flat hazard a quoted spread stands for.
    pub fn flat_hazard_of_spread(
        contract: &CdsContract,
        spread: f64,
        recovery: f64,
        discount: &DiscountCurve,
        accrual: AccrualIntegration,
    ) -> Option<f64> {
        let legs = FlatLegs::new(contract, recovery, discount, accrual)?;
        flat_hazard(spread, |h| legs.at(h).par_spread())
    }

    /// The upfront (fraction of notional, positive when the buyer pays) at running coupon
    /// `coupon` of a contract quoted at spread `spread`.
    pub fn to_upfront(
        contract: &CdsContract,
        spread: f64,
        coupon: f64,
        recovery: f64,
        discount: &DiscountCurve,
        accrual: AccrualIntegration,
    ) -> Option<f64> {
        let legs = FlatLegs::new(contract, recovery, discount, accrual)?;
        let h = flat_hazard(spread, |h| legs.at(h).par_spread())?;
        Some(legs.at(h).upfront(coupon))
    }

    /// The quoted spread of a contract trading at upfront `upfront` with running coupon
    /// `coupon`: the par spread of the flat hazard that gives that upfront.
    pub fn from_upfront(
        contract: &CdsContract,
        upfront: f64,
        coupon: f64,
        recovery: f64,
        discount: &DiscountCurve,
        accrual: AccrualIntegration,
    ) -> Option<f64> {
        let legs = FlatLegs::new(contract, recovery, discount, accrual)?;
        let h = flat_hazard(upfront, |h| legs.at(h).upfront(coupon))?;
        Some(legs.at(h).par_spread())
    }

    #[cfg(test)]
    mod tests {
        use super::super::price_legs;
        use super::*;
        use crate::time::{Calendar, Tenor};
        use chrono::NaiveDate;

        /// The grid built once gives, at every hazard, the legs `price_legs` gives on the flat
        /// curve, bit for bit: tenors from 6M to 10Y and an off-roll maturity, a flat and a
        /// sloped discount curve, every accrual variant, hazards from zero to 50 per year.
        #[test]
        fn legs_on_the_grid_built_once_are_price_legs() {
            let t = NaiveDate::from_ymd_opt(2024, 3, 20).unwrap();
            let cal = Calendar::weekends_only();
            let curves = crate::curves::discount::test_curves(t);
            let mut contracts: Vec<CdsContract> = [6, 12, 36, 60, 120]
                .iter()
                .map(|&m| CdsContract::standard(t, Tenor::from_months(m).unwrap(), &cal).unwrap())
                .collect();
            contracts.push(CdsContract::with_maturity(t, NaiveDate::from_ymd_opt(2029, 1, 31).unwrap(), &cal));
            let bits = |l: &CdsLegs| {
                [l.protection, l.premium01, l.accrual_on_default01, l.rebate01, l.cash_settle_df].map(f64::to_bits)
            };
            let mut compared = 0;
            for d in &curves {
                for accrual in [AccrualIntegration::Standard, AccrualIntegration::Exact, AccrualIntegration::Published]
                {
                    for c in &contracts {
                        let legs = FlatLegs::new(c, 0.35, d, accrual).unwrap();
                        for h in [0.0, 1e-7, 0.004, 0.0213, 0.37, 3.0, 50.0] {
                            let alone = price_legs(c, 0.35, d, &HazardCurve::flat(t, h), accrual).unwrap();
                            assert_eq!(bits(&legs.at(h)), bits(&alone), "{accrual:?} {} h = {h}", c.maturity);
                            compared += 1;
                        }
                    }
                }
            }
            assert_eq!(compared, 2 * 3 * 6 * 7);
        }
    }
}

#[cfg(test)]
mod plan_legs_tests {
    use super::*;
    use crate::time::{Calendar, Tenor};
    use chrono::NaiveDate;

    /// The legs handed over one by one on the thread's kept grid vectors are the legs of the
    /// collecting form (ln S on the grid, P S, their exponentials, each contract's terms), bit
    /// for bit: a long plan then shorter ones in turn (so the kept vectors hold a longer
    /// grid's values when a shorter one comes), three curves, a recovery per contract.
    #[test]
    fn legs_handed_over_are_the_collected_legs() {
        let t = NaiveDate::from_ymd_opt(2024, 3, 20).unwrap();
        let cal = Calendar::weekends_only();
        let contract = |m: u32| CdsContract::standard(t, Tenor::from_months(m).unwrap(), &cal).unwrap();
        let sets: [Vec<u32>; 3] = [vec![6, 12, 24, 36, 60, 84, 120], vec![12, 36], vec![6, 12, 24, 36, 60]];
        let bits = |l: &CdsLegs| {
            [l.protection, l.premium01, l.accrual_on_default01, l.rebate01, l.cash_settle_df].map(f64::to_bits)
        };
        let mut compared = 0;
        for d in &crate::curves::discount::test_curves(t) {
            for (i, months) in sets.iter().cycle().take(9).enumerate() {
                let contracts: Vec<CdsContract> = months.iter().map(|&m| contract(m)).collect();
                let refs: Vec<&CdsContract> = contracts.iter().collect();
                let times: Vec<f64> = months.iter().map(|&m| f64::from(m) / 12.0 + 0.01).collect();
                let hazards: Vec<f64> = (0..months.len()).map(|k| 0.002 + 0.004 * ((k + i) % 4) as f64).collect();
                let curve = HazardCurve::new(t, times, hazards).unwrap();
                let plan = LegPlan::build(t, &refs, d, curve.node_times(), AccrualIntegration::Standard);
                let recoveries: Vec<f64> = (0..months.len()).map(|k| 0.2 + 0.1 * (k % 4) as f64).collect();
                let log_q: Vec<f64> = curve.log_survival_at_sorted(&plan.times);
                let mut pq: Vec<f64> = plan.log_dfs.iter().zip(&log_q).map(|(p, q)| p + q).collect();
                crate::math::exp::exp_in_place(&mut pq);
                let mut seen = 0;
                each_legs_on_plan(
                    &plan,
                    |k| recoveries[k],
                    &curve,
                    |k, legs| {
                        let want = terms_legs(&plan, &plan.contracts[k], recoveries[k], &pq, &log_q);
                        assert_eq!(k, seen);
                        assert_eq!(bits(&legs), bits(&want), "contract {k} of {months:?}");
                        seen += 1;
                    },
                );
                assert_eq!(seen, months.len());
                compared += seen;
            }
        }
        assert!(compared > 80, "{compared}");
    }
}
