//! Fixed-coupon bonds: schedule, accrued interest, and clean and dirty price on a discount curve
//! and a hazard curve under three recovery conventions.
//!
//! Conventions (all prices per 100 of face value):
//!
//! * Settlement is the curves' reference date (T + 0): the price is the value at T of the flows
//!   paid strictly after T. A coupon paid on T belongs to the seller, and accrued interest is
//!   then zero. No ex-coupon period.
//! * Schedule: regular periods of 12 / frequency months rolled backwards from the maturity
//!   (each date = maturity - k periods, month-end clipping, unadjusted; payments on those
//!   dates). With an issue date that is not a roll date, the first period is a short stub from
//!   the issue date. Without an issue date the schedule reaches back to the first roll date on
//!   or before settlement.
//! * Coupon of a period = coupon rate x 100 x the day-count fraction of the period, the
//!   Actual/Actual ICMA fraction taken against the regular reference period (for a stub, the
//!   regular period ending on its end date). Accrued interest = coupon rate x 100 x the fraction
//!   from the period start to settlement. Clean = dirty - accrued.
//! * Recovery conventions, with P the discount factor, S the survival and lambda the hazard:
//!   - [`RecoveryConvention::Par`] (recovery of face value): sum CF_i P(t_i) S(t_i) plus
//!     R x 100 paid at the default time, 100 R integral_0^T P(t) lambda(t) S(t) dt, integrated
//!     in closed form on the joint grid of discount pillars and hazard nodes, as the CDS
//!     protection leg is;
//!   - [`RecoveryConvention::Zero`]: sum CF_i P(t_i) S(t_i), the risk-free price with each
//!     flow multiplied by its survival (discounting at r + lambda);
//!   - [`RecoveryConvention::Market`] (recovery of market value): sum CF_i P(t_i) S(t_i)^(1-R),
//!     i.e. discounting at r + lambda (1 - R) (Duffie and Singleton 1999, Review of Financial
//!     Studies).
//! * Yield to maturity: compounded at the bond's frequency, with the bond's day count for the
//!   time of each flow: DF_i = (1 + y/f)^(-f tau_i), tau_i = the fraction from settlement to the
//!   end of the current period plus the fractions of the later whole periods.
//!
//! Pure: terms and curves in, numbers out.

use crate::curves::{year_time, DiscountCurve, HazardCurve};
use crate::instruments::cds::protection_term;
use crate::time::{add_months, DayCount};
use chrono::NaiveDate;

/// What a holder receives when the issuer defaults.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Hash)]
pub enum RecoveryConvention {
    /// Recovery of face value: R x face paid at the default time.
    #[default]
    Par,
    /// Nothing recovered.
    Zero,
    /// Recovery of market value: a fraction R of the pre-default value.
    Market,
}
crate::text_form!(RecoveryConvention { Par => "par", Zero => "zero", Market => "market" });

impl std::str::FromStr for RecoveryConvention {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, String> {
        match s.trim().to_ascii_lowercase().as_str() {
            "par" | "face" => Ok(RecoveryConvention::Par),
            "zero" => Ok(RecoveryConvention::Zero),
            "market" => Ok(RecoveryConvention::Market),
            _ => Err(format!("recovery convention {s:?} is not understood: expected par, zero or market")),
        }
    }
}

/// The static terms of a fixed-coupon bond.
#[derive(Debug, Clone, PartialEq)]
pub struct BondTerms {
    /// Annual coupon rate as a decimal (5% = 0.05).
    pub coupon: f64,
    /// Coupons per year: 1, 2, 4 or 12.
    pub frequency: u32,
    pub maturity: NaiveDate,
    pub day_count: DayCount,
    pub issue_date: Option<NaiveDate>,
}

/// Why a bond cannot be priced on a settlement date.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum BondError {
    #[error("bond frequency {frequency} is not one of 1, 2, 4, 12")]
    Frequency { frequency: u32 },
    #[error("bond coupon {coupon} is not a finite number in [0, 1)")]
    Coupon { coupon: f64 },
    #[error("bond matures on {maturity}, on or before settlement {settlement}")]
    Matured { maturity: NaiveDate, settlement: NaiveDate },
    #[error("bond is issued on {issue}, after settlement {settlement}")]
    NotIssued { issue: NaiveDate, settlement: NaiveDate },
    #[error("bond issue date {issue} is on or after its maturity {maturity}")]
    IssueAfterMaturity { issue: NaiveDate, maturity: NaiveDate },
    #[error("curves must be referenced on the settlement date {settlement}: discount curve is on {discount}, hazard curve on {hazard}")]
    ReferenceDate { settlement: NaiveDate, discount: NaiveDate, hazard: NaiveDate },
    #[error("recovery {recovery} is not a fraction in [0, 1)")]
    Recovery { recovery: f64 },
    #[error("clean price {price} is not a positive number")]
    Price { price: f64 },
    #[error("no yield reprices dirty price {dirty} (bracket [{lo}, {hi}], {iterations} iterations)")]
    Yield { dirty: f64, lo: f64, hi: f64, iterations: u32 },
}

/// One coupon period of the schedule.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BondPeriod {
    pub accrual_start: NaiveDate,
    /// End of accrual = payment date.
    pub accrual_end: NaiveDate,
    /// The regular period the day-count fraction refers to.
    pub ref_start: NaiveDate,
    pub ref_end: NaiveDate,
    /// Coupon paid at the end of the period, per 100 face.
    pub amount: f64,
}

/// A bond's flows as seen from one settlement date: what a pricer needs, computed once.
#[derive(Debug, Clone, PartialEq)]
pub struct BondCashflows {
    pub settlement: NaiveDate,
    pub frequency: u32,
    /// Periods whose payment is after settlement, in order.
    pub periods: Vec<BondPeriod>,
    /// Act/365F time from settlement of each payment (the curves' axis).
    pub times: Vec<f64>,
    /// Total paid at each time per 100 face (coupon, plus 100 at maturity).
    pub amounts: Vec<f64>,
    /// Bond day-count time for the yield: tau_i of the module notes.
    pub yield_times: Vec<f64>,
    /// Accrued interest at settlement per 100 face.
    pub accrued: f64,
    /// Act/365F time to maturity.
    pub t_maturity: f64,
}

/// Prices of one bond on one set of curves, per 100 face.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BondPrice {
    pub dirty: f64,
    pub clean: f64,
    pub accrued: f64,
    /// Dirty price on the discount curve alone (no default).
    pub risk_free_dirty: f64,
    /// Value of the recovery paid at default (nonzero only for [`RecoveryConvention::Par`]).
    pub recovery_value: f64,
}

impl BondTerms {
    fn check(&self) -> Result<(), BondError> {
        if ![1, 2, 4, 12].contains(&self.frequency) {
            return Err(BondError::Frequency { frequency: self.frequency });
        }
        if !(self.coupon.is_finite() && (0.0..1.0).contains(&self.coupon)) {
            return Err(BondError::Coupon { coupon: self.coupon });
        }
        if let Some(issue) = self.issue_date {
            if issue >= self.maturity {
                return Err(BondError::IssueAfterMaturity { issue, maturity: self.maturity });
            }
        }
        Ok(())
    }

    /// Months per regular period.
    pub fn period_months(&self) -> i32 {
        12 / self.frequency as i32
    }

    /// The schedule dates, rolled back from the maturity: the issue date (if given) or the
    /// first roll date on or before `settlement`, then the roll dates up to the maturity.
    pub fn schedule_dates(&self, settlement: NaiveDate) -> Vec<NaiveDate> {
        self.schedule(settlement).0
    }

    /// The schedule dates and whether the first period is a stub (an issue date that is not a
    /// roll date).
    fn schedule(&self, settlement: NaiveDate) -> (Vec<NaiveDate>, bool) {
        let m = self.period_months();
        let mut back = vec![self.maturity];
        let mut k = 1;
        let mut stub = false;
        loop {
            let d = add_months(self.maturity, -m * k);
            match self.issue_date {
                Some(issue) if d <= issue => {
                    stub = d != issue;
                    back.push(issue);
                    break;
                }
                None if d <= settlement => {
                    back.push(d);
                    break;
                }
                _ => back.push(d),
            }
            k += 1;
        }
        back.reverse();
        (back, stub)
    }

    /// The flows after `settlement` and the accrued interest at it.
    pub fn cashflows(&self, settlement: NaiveDate) -> Result<BondCashflows, BondError> {
        self.check()?;
        if self.maturity <= settlement {
            return Err(BondError::Matured { maturity: self.maturity, settlement });
        }
        if let Some(issue) = self.issue_date {
            if issue > settlement {
                return Err(BondError::NotIssued { issue, settlement });
            }
        }
        let (dates, first_is_stub) = self.schedule(settlement);
        let m = self.period_months();
        let f = self.frequency;
        let dc = self.day_count;
        let mut periods = Vec::with_capacity(dates.len());
        let mut accrued = 0.0;
        for (i, w) in dates.windows(2).enumerate() {
            let (s, e) = (w[0], w[1]);
            if e <= settlement {
                continue;
            }
            // Regular periods are their own reference (a roll date clipped to a month end
            // stays the period's start); a stub refers to the regular period ending on its end
            // date.
            let (rs, re) = if i == 0 && first_is_stub { (add_months(e, -m), e) } else { (s, e) };
            let amount = 100.0 * self.coupon * dc.year_fraction_in_period(s, e, rs, re, f);
            if s <= settlement {
                accrued = 100.0 * self.coupon * dc.year_fraction_in_period(s, settlement, rs, re, f);
            }
            periods.push(BondPeriod { accrual_start: s, accrual_end: e, ref_start: rs, ref_end: re, amount });
        }
        let times: Vec<f64> = periods.iter().map(|p| year_time(settlement, p.accrual_end)).collect();
        let mut amounts: Vec<f64> = periods.iter().map(|p| p.amount).collect();
        *amounts.last_mut().expect("a bond not matured has a period") += 100.0;
        let mut yield_times = Vec::with_capacity(periods.len());
        let mut tau = 0.0;
        for (i, p) in periods.iter().enumerate() {
            let from = if i == 0 { settlement.max(p.accrual_start) } else { p.accrual_start };
            tau += dc.year_fraction_in_period(from, p.accrual_end, p.ref_start, p.ref_end, f);
            yield_times.push(tau);
        }
        let t_maturity = year_time(settlement, self.maturity);
        Ok(BondCashflows { settlement, frequency: f, periods, times, amounts, yield_times, accrued, t_maturity })
    }
}

impl BondCashflows {
    /// Dirty price on the discount curve alone.
    pub fn risk_free_dirty(&self, discount: &DiscountCurve) -> f64 {
        self.times.iter().zip(&self.amounts).map(|(&t, &a)| a * discount.df_at(t)).sum()
    }

    /// Prices on curves referenced on the settlement date.
    pub fn price(
        &self,
        discount: &DiscountCurve,
        hazard: &HazardCurve,
        recovery: f64,
        convention: RecoveryConvention,
    ) -> Result<BondPrice, BondError> {
        if discount.reference() != self.settlement || hazard.reference() != self.settlement {
            return Err(BondError::ReferenceDate {
                settlement: self.settlement,
                discount: discount.reference(),
                hazard: hazard.reference(),
            });
        }
        if !(recovery.is_finite() && (0.0..1.0).contains(&recovery)) {
            return Err(BondError::Recovery { recovery });
        }
        Ok(self.price_unchecked(discount, hazard, recovery, convention))
    }

    /// [`BondCashflows::price`] without the checks (the fits call it in their loops).
    pub fn price_unchecked(
        &self,
        discount: &DiscountCurve,
        hazard: &HazardCurve,
        recovery: f64,
        convention: RecoveryConvention,
    ) -> BondPrice {
        let mut dirty = 0.0;
        let mut risk_free = 0.0;
        let survival_power = match convention {
            RecoveryConvention::Market => 1.0 - recovery,
            _ => 1.0,
        };
        for (&t, &a) in self.times.iter().zip(&self.amounts) {
            let ldf = discount.log_df_at(t);
            risk_free += a * ldf.exp();
            dirty += a * (ldf + survival_power * hazard.log_survival_at(t)).exp();
        }
        let recovery_value = match convention {
            RecoveryConvention::Par => 100.0 * recovery * default_integral(discount, hazard, self.t_maturity),
            _ => 0.0,
        };
        dirty += recovery_value;
        BondPrice {
            dirty,
            clean: dirty - self.accrued,
            accrued: self.accrued,
            risk_free_dirty: risk_free,
            recovery_value,
        }
    }

    /// Dirty price for a yield `y` (compounded at the bond's frequency), and its derivative.
    pub fn dirty_from_yield(&self, y: f64) -> (f64, f64) {
        let f = self.frequency as f64;
        let base = 1.0 + y / f;
        let (mut p, mut dp) = (0.0, 0.0);
        for (&tau, &a) in self.yield_times.iter().zip(&self.amounts) {
            let df = base.powf(-f * tau);
            p += a * df;
            dp += a * df * (-tau / base);
        }
        (p, dp)
    }

    /// Yield to maturity of a dirty price (Newton, bracketed by bisection on (-f, 10)).
    pub fn yield_from_dirty(&self, dirty: f64) -> Result<f64, BondError> {
        let f = self.frequency as f64;
        let (mut lo, mut hi) = (-f + 1e-9, 10.0);
        let mut y = 0.05;
        for _ in 0..200u32 {
            let (p, dp) = self.dirty_from_yield(y);
            let r = p - dirty;
            if r == 0.0 {
                return Ok(y);
            }
            // Price falls with yield.
            if r > 0.0 {
                lo = y;
            } else {
                hi = y;
            }
            let newton = y - r / dp;
            if newton.is_finite() && (newton - y).abs() < 1e-15 {
                return Ok(newton);
            }
            y = if newton > lo && newton < hi { newton } else { 0.5 * (lo + hi) };
            if hi - lo < 1e-15 {
                return Ok(y);
            }
        }
        Err(BondError::Yield { dirty, lo, hi, iterations: 200 })
    }

    /// Modified duration -dP/dy / P at yield y (in years of the bond's day count).
    pub fn modified_duration(&self, y: f64) -> f64 {
        let (p, dp) = self.dirty_from_yield(y);
        -dp / p
    }
}

/// integral_0^T P(t) lambda(t) S(t) dt in closed form on the joint grid of discount pillars and
/// hazard nodes (the CDS protection integral, with its series expansion for tiny exponents).
pub fn default_integral(discount: &DiscountCurve, hazard: &HazardCurve, t_end: f64) -> f64 {
    let grid = default_grid(discount, hazard.node_times(), t_end);
    let log_dfs: Vec<f64> = grid.iter().map(|&t| discount.log_df_at(t)).collect();
    default_integral_on(&grid, &log_dfs, hazard)
}

/// The points of [`default_integral`]'s grid: the discount pillars and the hazard nodes
/// `node_times` inside (0, t_end), and t_end.
fn default_grid(discount: &DiscountCurve, node_times: &[f64], t_end: f64) -> Vec<f64> {
    let reference = discount.reference();
    let mut grid: Vec<f64> = discount
        .pillar_dates()
        .iter()
        .map(|&d| year_time(reference, d))
        .chain(node_times.iter().copied())
        .filter(|&t| t > 0.0 && t < t_end)
        .collect();
    grid.push(t_end);
    grid.sort_by(f64::total_cmp);
    grid.dedup();
    grid
}

/// [`default_integral`] on its grid with ln DF at each point given. An interval's P S at its
/// start is the one computed at the end of the interval before (the same exponential of the
/// same sum), 1 at t = 0.
fn default_integral_on(grid: &[f64], log_dfs: &[f64], hazard: &HazardCurve) -> f64 {
    let mut acc = 0.0;
    let (mut lp0, mut lq0) = (0.0f64, 0.0f64);
    let mut a0 = (lp0 + lq0).exp();
    for (&t, &lp1) in grid.iter().zip(log_dfs) {
        let lq1 = hazard.log_survival_at(t);
        let f = lp0 - lp1;
        let h = lq0 - lq1;
        let a1 = (lp1 + lq1).exp();
        acc += protection_term::<f64>(a0, a1, f, h);
        lp0 = lp1;
        lq0 = lq1;
        a0 = a1;
    }
    acc
}

/// What a bond's price takes from the discount curve alone, for hazard curves with given node
/// times: ln DF at each payment and [`default_integral`]'s grid with ln DF on it. A fit prices
/// the same bonds on many hazard curves of the same nodes ([`BondCashflows::clean_on`]).
#[derive(Debug, Clone)]
pub struct BondOnDiscount {
    log_dfs: Vec<f64>,
    node_times: Vec<f64>,
    grid: Vec<f64>,
    grid_log_dfs: Vec<f64>,
}

impl BondCashflows {
    /// The discount terms of this bond on `discount` for hazard curves with the node times
    /// `node_times`.
    pub fn on_discount(&self, discount: &DiscountCurve, node_times: &[f64]) -> BondOnDiscount {
        let grid = default_grid(discount, node_times, self.t_maturity);
        BondOnDiscount {
            log_dfs: self.times.iter().map(|&t| discount.log_df_at(t)).collect(),
            node_times: node_times.to_vec(),
            grid_log_dfs: grid.iter().map(|&t| discount.log_df_at(t)).collect(),
            grid,
        }
    }

    /// The clean price of [`BondCashflows::price_unchecked`], bit for bit, from the discount
    /// terms `on` ([`BondCashflows::on_discount`] with `hazard`'s node times).
    pub fn clean_on(
        &self,
        on: &BondOnDiscount,
        hazard: &HazardCurve,
        recovery: f64,
        convention: RecoveryConvention,
    ) -> f64 {
        debug_assert_eq!(hazard.node_times(), &on.node_times[..], "prepared for other hazard nodes");
        let survival_power = match convention {
            RecoveryConvention::Market => 1.0 - recovery,
            _ => 1.0,
        };
        let mut dirty = 0.0;
        for ((&t, &a), &ldf) in self.times.iter().zip(&self.amounts).zip(&on.log_dfs) {
            dirty += a * (ldf + survival_power * hazard.log_survival_at(t)).exp();
        }
        let recovery_value = match convention {
            RecoveryConvention::Par => 100.0 * recovery * default_integral_on(&on.grid, &on.grid_log_dfs, hazard),
            _ => 0.0,
        };
        dirty += recovery_value;
        dirty - self.accrued
    }
}

/// Convenience: prices `terms` on curves referenced on their common reference date.
pub fn price_bond(
    terms: &BondTerms,
    discount: &DiscountCurve,
    hazard: &HazardCurve,
    recovery: f64,
    convention: RecoveryConvention,
) -> Result<BondPrice, BondError> {
    terms.cashflows(discount.reference())?.price(discount, hazard, recovery, convention)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn d(y: i32, m: u32, day: u32) -> NaiveDate {
        NaiveDate::from_ymd_opt(y, m, day).unwrap()
    }

    #[test]
    fn schedule_rolls_back_from_maturity_with_month_end_clipping() {
        let b = BondTerms {
            coupon: 0.05,
            frequency: 2,
            maturity: d(2029, 8, 31),
            day_count: DayCount::Thirty360,
            issue_date: None,
        };
        let dates = b.schedule_dates(d(2024, 5, 10));
        assert_eq!(dates[0], d(2024, 2, 29));
        assert_eq!(dates[1], d(2024, 8, 31));
        assert_eq!(*dates.last().unwrap(), d(2029, 8, 31));
        let cf = b.cashflows(d(2024, 5, 10)).unwrap();
        assert_eq!(cf.periods.len(), 11);
        // 30/360 from 29 Feb to 10 May: 71 days.
        assert!((cf.accrued - 5.0 * 71.0 / 360.0).abs() < 1e-12);
    }

    #[test]
    fn stub_from_issue_date_and_coupon_on_settlement() {
        let b = BondTerms {
            coupon: 0.04,
            frequency: 2,
            maturity: d(2027, 6, 15),
            day_count: DayCount::ActActIcma,
            issue_date: Some(d(2024, 3, 1)),
        };
        let cf = b.cashflows(d(2024, 4, 1)).unwrap();
        let p0 = cf.periods[0];
        assert_eq!((p0.accrual_start, p0.accrual_end), (d(2024, 3, 1), d(2024, 6, 15)));
        assert_eq!((p0.ref_start, p0.ref_end), (d(2023, 12, 15), d(2024, 6, 15)));
        assert!((p0.amount - 4.0 * 106.0 / (2.0 * 183.0)).abs() < 1e-12);
        // Settlement on a coupon date: that coupon is gone and nothing has accrued.
        let cf = b.cashflows(d(2024, 6, 15)).unwrap();
        assert_eq!(cf.accrued, 0.0);
        assert_eq!(cf.periods[0].accrual_start, d(2024, 6, 15));
        assert!((cf.periods[0].amount - 2.0).abs() < 1e-15);
    }

    #[test]
    fn yield_round_trips() {
        let b = BondTerms {
            coupon: 0.06,
            frequency: 4,
            maturity: d(2031, 3, 20),
            day_count: DayCount::ActActIcma,
            issue_date: None,
        };
        let cf = b.cashflows(d(2024, 5, 7)).unwrap();
        for y in [-0.005, 0.0, 0.03, 0.12] {
            let (p, _) = cf.dirty_from_yield(y);
            let got = cf.yield_from_dirty(p).unwrap();
            assert!((got - y).abs() < 1e-13, "{y}: {got}");
        }
    }

    /// The fits' clean price on prepared discount terms is `price_unchecked`'s, bit for bit,
    /// and the default integral is the two-exponential form it had (P S at both ends of each
    /// interval computed afresh): three conventions, three recoveries, both test discount
    /// curves, flat and stepped hazard curves (nodes on and off the pillars), short and long
    /// bonds, settlement on and off a coupon date.
    #[test]
    fn prepared_discount_terms_price_as_the_curves_do() {
        let two_exp = |discount: &DiscountCurve, hazard: &HazardCurve, t_end: f64| {
            let grid = default_grid(discount, hazard.node_times(), t_end);
            let (mut acc, mut lp0, mut lq0) = (0.0f64, 0.0f64, 0.0f64);
            for &t in &grid {
                let (lp1, lq1) = (discount.log_df_at(t), hazard.log_survival_at(t));
                acc += protection_term::<f64>((lp0 + lq0).exp(), (lp1 + lq1).exp(), lp0 - lp1, lq0 - lq1);
                (lp0, lq0) = (lp1, lq1);
            }
            acc
        };
        let mut checked = 0;
        for settle in [d(2024, 5, 10), d(2024, 8, 31)] {
            for discount in crate::curves::discount::test_curves(settle) {
                let pillar = discount.pillar_dates().get(1).map_or(1.5, |&p| year_time(settle, p));
                let hazards: [(Vec<f64>, Vec<f64>); 3] = [
                    (vec![30.0], vec![0.013]),
                    (vec![1.0, pillar, 3.0, 7.0], vec![0.004, 0.011, 0.02, 0.035]),
                    (vec![0.25, 2.0, 12.0], vec![1e-9, 0.3, 0.05]),
                ];
                for (times, h) in hazards {
                    let hazard = HazardCurve::new(settle, times.clone(), h).unwrap();
                    for (coupon, maturity) in [(0.05, d(2029, 8, 31)), (0.0725, d(2025, 2, 28)), (0.0, d(2036, 2, 29))]
                    {
                        let b = BondTerms {
                            coupon,
                            frequency: 2,
                            maturity,
                            day_count: DayCount::Thirty360,
                            issue_date: None,
                        };
                        let cf = b.cashflows(settle).unwrap();
                        let on = cf.on_discount(&discount, &times);
                        let t_end = cf.t_maturity;
                        assert_eq!(
                            default_integral(&discount, &hazard, t_end).to_bits(),
                            two_exp(&discount, &hazard, t_end).to_bits()
                        );
                        for convention in
                            [RecoveryConvention::Par, RecoveryConvention::Zero, RecoveryConvention::Market]
                        {
                            for recovery in [0.0, 0.4, 0.75] {
                                let want = cf.price_unchecked(&discount, &hazard, recovery, convention).clean;
                                let got = cf.clean_on(&on, &hazard, recovery, convention);
                                assert_eq!(got.to_bits(), want.to_bits(), "{convention:?} {recovery} {maturity}");
                                checked += 1;
                            }
                        }
                    }
                }
            }
        }
        assert_eq!(checked, 2 * 2 * 3 * 3 * 3 * 3);
    }

    #[test]
    fn bad_terms_are_refused() {
        let mut b = BondTerms {
            coupon: 0.05,
            frequency: 3,
            maturity: d(2030, 1, 1),
            day_count: DayCount::Act365Fixed,
            issue_date: None,
        };
        assert!(matches!(b.cashflows(d(2024, 1, 1)), Err(BondError::Frequency { .. })));
        b.frequency = 1;
        assert!(matches!(b.cashflows(d(2030, 1, 1)), Err(BondError::Matured { .. })));
        b.issue_date = Some(d(2025, 1, 1));
        assert!(matches!(b.cashflows(d(2024, 1, 1)), Err(BondError::NotIssued { .. })));
    }
}
