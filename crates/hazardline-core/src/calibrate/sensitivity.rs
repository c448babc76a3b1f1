//! How much a calibrated curve's outputs move with its inputs and with the modelling choices.
//!
//! For one curve (its quotes, its day's discount curve, the run's bootstrap settings) every
//! [`Shift`] re-bootstraps the curve from scratch with one thing changed, and reads three
//! measures off each curve: the 1Y default probability 1 - S(1Y), the 5Y hazard h(5Y) (the
//! hazard of the segment holding t = 5 years), and the clean upfront of the standard 5Y
//! contract at the reference coupon, per unit notional, positive when the protection buyer
//! pays (its change under [`Shift::QuotesUp1bp`] is the curve's CS01 in upfront terms).
//!
//! The shifts:
//! - quotes +1 bp: every par spread + 1 bp; an upfront quote (a quoted spread is one, after
//!   its conversion) + 1 bp x the contract's risky annuity on the unshifted curve, the upfront
//!   change of a 1 bp wider running spread to first order;
//! - recovery +5 and -5 points on every quote (the shifted recovery must stay in [0, 1), else
//!   the shift is `out_of_range`);
//! - the discount curve's continuously compounded zero rates + 1 bp at every time (each
//!   pillar's ln DF - 1e-4 t; log-linear interpolation keeps the shift exact between pillars);
//! - the accrual variants `standard` and `exact` in place of the run's;
//! - the infeasible policy `fail` in place of `floor` (or the reverse).
//!
//! Plain numerical code: no I/O.

use super::bootstrap::{bootstrap, BootstrapError, BootstrapPlan, BootstrapQuote, BootstrapSettings, InfeasiblePolicy};
use crate::curves::{year_time, DiscountCurve, HazardCurve};
use crate::instruments::cds::{price_legs, price_legs_on_plan, AccrualIntegration, CdsContract, CdsQuote, LegPlan};
use crate::time::{Calendar, Tenor};
use chrono::NaiveDate;

/// One re-bootstrap of a curve with one input or choice changed.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Shift {
    /// The curve as the run calibrated it (the levels the others are compared with).
    Base,
    QuotesUp1bp,
    RecoveryUp5,
    RecoveryDown5,
    DiscountUp1bp,
    AccrualStandard,
    AccrualExact,
    /// The other infeasible policy than the run's.
    OtherInfeasiblePolicy,
}
crate::text_form!(Shift {
    Base => "base",
    QuotesUp1bp => "quotes_up_1bp",
    RecoveryUp5 => "recovery_up_5pt",
    RecoveryDown5 => "recovery_down_5pt",
    DiscountUp1bp => "discount_up_1bp",
    AccrualStandard => "accrual_standard",
    AccrualExact => "accrual_exact",
    OtherInfeasiblePolicy => "infeasible_other_policy"
});

impl Shift {
    pub const ALL: [Shift; 8] = [
        Shift::Base,
        Shift::QuotesUp1bp,
        Shift::RecoveryUp5,
        Shift::RecoveryDown5,
        Shift::DiscountUp1bp,
        Shift::AccrualStandard,
        Shift::AccrualExact,
        Shift::OtherInfeasiblePolicy,
    ];
}

/// The three measures of a curve.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Measures {
    /// 1 - S(1Y).
    pub pd_1y: f64,
    /// h(5Y), per year.
    pub hazard_5y: f64,
    /// Clean upfront of the standard 5Y contract at the reference coupon, per unit notional.
    pub upfront_5y: f64,
}

/// What one shift gave.
#[derive(Debug, Clone, PartialEq)]
pub struct ShiftResult {
    pub shift: Shift,
    /// `ok`; `not_built` (the bootstrap refused the shifted quotes); `failed` (a node failed
    /// or the fail policy stopped the curve); `out_of_range` (a shifted recovery outside
    /// [0, 1)); `not_applicable` (the shift is the run's own choice: the accrual variant the
    /// run uses).
    pub status: &'static str,
    pub measures: Option<Measures>,
    /// Nodes floored at zero hazard in this curve (under the floor policy).
    pub floored_nodes: usize,
}

/// The curve's inputs.
#[derive(Debug, Clone, Copy)]
pub struct CurveInputs<'a> {
    pub trade_date: NaiveDate,
    pub quotes: &'a [BootstrapQuote],
    pub discount: &'a DiscountCurve,
    pub calendar: &'a Calendar,
    pub settings: &'a BootstrapSettings,
    /// Running coupon (decimal) of the 5Y contract whose upfront is measured.
    pub coupon: f64,
    /// Bootstrap plans shared with the other curves of the day quoted for the same terms
    /// (the default: none, each shift builds its own; the numbers are the same).
    pub plans: SharedPlans<'a>,
}

/// A plan for the curve's terms, or why it cannot be built (as [`BootstrapPlan::for_terms`]
/// returns it).
pub type PlanResult = Result<BootstrapPlan, BootstrapError>;

/// Bootstrap plans for one (trade date, currency, terms), built once and used by every curve
/// quoted so: a shift that finds its plan here solves on it instead of building one.
#[derive(Debug, Default, Clone, Copy)]
pub struct SharedPlans<'a> {
    /// On the day's discount curve with the run's accrual variant.
    pub base: Option<&'a PlanResult>,
    /// On [`shifted_discount`] of the day's curve by 1 bp (that curve, and the plan).
    pub discount_up: Option<&'a (Option<DiscountCurve>, Option<PlanResult>)>,
    /// With the accrual variants `standard` and `exact` on the day's discount curve.
    pub standard: Option<&'a PlanResult>,
    pub exact: Option<&'a PlanResult>,
}

impl SharedPlans<'_> {
    /// Builds what [`SharedPlans`] refers to for `terms` (see [`BootstrapQuote::term`]) on
    /// `trade`: the discount-shift curve and plan, and the plans of the accrual variants other
    /// than `settings.accrual`.
    pub fn build(
        trade: NaiveDate,
        terms: &[(Tenor, Option<NaiveDate>)],
        discount: &DiscountCurve,
        calendar: &Calendar,
        settings: &BootstrapSettings,
    ) -> OwnedPlans {
        let plan = |d: &DiscountCurve, accrual| BootstrapPlan::for_terms(trade, terms, d, calendar, accrual);
        let shifted = shifted_discount(discount, 1.0);
        let shifted_plan = shifted.as_ref().map(|d| plan(d, settings.accrual));
        let variant = |a: AccrualIntegration| (a != settings.accrual).then(|| plan(discount, a));
        OwnedPlans {
            discount_up: (shifted, shifted_plan),
            standard: variant(AccrualIntegration::Standard),
            exact: variant(AccrualIntegration::Exact),
        }
    }
}

/// The plans [`SharedPlans::build`] makes, held by the caller for the day.
#[derive(Debug)]
pub struct OwnedPlans {
    pub discount_up: (Option<DiscountCurve>, Option<PlanResult>),
    pub standard: Option<PlanResult>,
    pub exact: Option<PlanResult>,
}

impl OwnedPlans {
    /// The shared plans, with `base` (the run's own plan of these terms) beside them.
    pub fn shared<'a>(&'a self, base: Option<&'a PlanResult>) -> SharedPlans<'a> {
        SharedPlans {
            base,
            discount_up: Some(&self.discount_up),
            standard: self.standard.as_ref(),
            exact: self.exact.as_ref(),
        }
    }
}

/// The standard 5Y contract of a curve's trade date and its leg grids, each made once per
/// curve instead of once per shift: a grid by (the discount curve: the day's or the shifted
/// one, the accrual variant, the hazard curve's node times), so that every shift that prices
/// on the same inputs prices on the grid `price_legs` would build for them.
#[derive(Default)]
struct FiveYear {
    /// None until asked for; then the contract, or None when it has no schedule.
    contract: Option<Option<CdsContract>>,
    grids: Vec<((bool, AccrualIntegration, Vec<u64>), LegPlan)>,
}

fn measures(
    c: &CurveInputs<'_>,
    curve: &HazardCurve,
    (discount, shifted): (&DiscountCurve, bool),
    recovery: f64,
    accrual: AccrualIntegration,
    five: &mut FiveYear,
) -> Option<Measures> {
    let contract = five
        .contract
        .get_or_insert_with(|| {
            let five = Tenor::from_months(60)?;
            CdsContract::standard(c.trade_date, five, c.calendar).ok()
        })
        .as_ref()?;
    // `price_legs`'s own check: every curve of the trade date.
    let trade = contract.trade_date;
    if discount.reference() != trade || curve.reference() != trade {
        return None;
    }
    let nodes = curve.node_times();
    let same = |(s, a, n): &(bool, AccrualIntegration, Vec<u64>)| {
        *s == shifted && *a == accrual && n.len() == nodes.len() && n.iter().zip(nodes).all(|(n, t)| *n == t.to_bits())
    };
    let at = match five.grids.iter().position(|(k, _)| same(k)) {
        Some(i) => i,
        None => {
            let grid = LegPlan::build(trade, &[contract], discount, nodes, accrual);
            five.grids.push(((shifted, accrual, nodes.iter().map(|t| t.to_bits()).collect()), grid));
            five.grids.len() - 1
        }
    };
    let legs = price_legs_on_plan(&five.grids[at].1, &[recovery], curve)[0];
    Some(Measures {
        pd_1y: 1.0 - curve.survival_at(1.0),
        hazard_5y: curve.hazard_at(5.0),
        upfront_5y: legs.upfront(c.coupon),
    })
}

/// The discount curve with every zero rate 1 bp higher.
pub fn shifted_discount(d: &DiscountCurve, bp: f64) -> Option<DiscountCurve> {
    let r = d.reference();
    let pillars: Vec<(NaiveDate, f64)> =
        d.pillar_dates().iter().zip(d.pillar_log_dfs()).map(|(&p, &l)| (p, l - bp * 1e-4 * year_time(r, p))).collect();
    DiscountCurve::from_log_discount_factors(r, &pillars).ok()
}

/// Every shift of one curve, [`Shift::ALL`] in order (the base first).
pub fn curve_sensitivities(c: &CurveInputs<'_>) -> Vec<ShiftResult> {
    let recovery = c.quotes.first().map_or(0.4, |q| q.recovery);
    // The fit of one shift: on the shared plan when there is one, else on a plan of its own
    // (`bootstrap`), the same numbers either way.
    let fit = |quotes: &[BootstrapQuote],
               discount: &DiscountCurve,
               settings: &BootstrapSettings,
               plan: Option<&PlanResult>|
     -> Result<super::bootstrap::CurveFit, BootstrapError> {
        match plan {
            Some(Ok(p)) => p.solve(quotes, settings),
            Some(Err(e)) => Err(e.clone()),
            None => bootstrap(c.trade_date, quotes, discount, c.calendar, settings),
        }
    };
    // The 5Y contract and its grids, shared by the shifts (see `FiveYear`).
    let five = std::cell::RefCell::new(FiveYear::default());
    let result = |shift: Shift,
                  fitted: &Result<super::bootstrap::CurveFit, BootstrapError>,
                  discount: (&DiscountCurve, bool),
                  settings: &BootstrapSettings,
                  recovery: f64|
     -> ShiftResult {
        let done = |status, measures, floored_nodes| ShiftResult { shift, status, measures, floored_nodes };
        let fit = match fitted {
            Ok(f) => f,
            Err(_) => return done("not_built", None, 0),
        };
        let floored = fit.nodes.iter().filter(|n| n.status == super::NodeStatus::Floored).count();
        match (&fit.curve, fit.complete() && !fit.failed) {
            (Some(h), true) => match measures(c, h, discount, recovery, settings.accrual, &mut five.borrow_mut()) {
                Some(m) => done("ok", Some(m), floored),
                None => done("not_built", None, floored),
            },
            _ => done("failed", None, floored),
        }
    };
    let run = |shift: Shift,
               quotes: &[BootstrapQuote],
               (discount, shifted): (&DiscountCurve, bool),
               settings: &BootstrapSettings,
               recovery: f64,
               plan: Option<&PlanResult>|
     -> ShiftResult {
        result(shift, &fit(quotes, discount, settings, plan), (discount, shifted), settings, recovery)
    };
    let mut out = Vec::with_capacity(Shift::ALL.len());
    let base_fit = fit(c.quotes, c.discount, c.settings, c.plans.base);
    out.push(result(Shift::Base, &base_fit, (c.discount, false), c.settings, recovery));
    // The base curve, for the risky annuities of the upfront quotes' spread shift.
    let base_curve = base_fit.ok().and_then(|f| f.curve);
    for shift in &Shift::ALL[1..] {
        let r = match shift {
            Shift::Base => continue,
            Shift::QuotesUp1bp => {
                let bumped: Option<Vec<BootstrapQuote>> = c
                    .quotes
                    .iter()
                    .map(|q| {
                        let quote = match q.quote {
                            CdsQuote::ParSpread(s) => CdsQuote::ParSpread(s + 1e-4),
                            CdsQuote::Upfront { upfront, coupon } => {
                                let curve = base_curve.as_ref()?;
                                let k = q.contract(c.trade_date, c.calendar).ok()?;
                                let legs = price_legs(&k, q.recovery, c.discount, curve, c.settings.accrual).ok()?;
                                CdsQuote::Upfront {
                                    upfront: upfront + 1e-4 * legs.risky_annuity() / legs.cash_settle_df,
                                    coupon,
                                }
                            }
                        };
                        Some(BootstrapQuote { quote, ..*q })
                    })
                    .collect();
                match bumped {
                    Some(q) => run(*shift, &q, (c.discount, false), c.settings, recovery, c.plans.base),
                    None => ShiftResult { shift: *shift, status: "not_built", measures: None, floored_nodes: 0 },
                }
            }
            Shift::RecoveryUp5 | Shift::RecoveryDown5 => {
                let d = if *shift == Shift::RecoveryUp5 { 0.05 } else { -0.05 };
                let q: Vec<BootstrapQuote> =
                    c.quotes.iter().map(|q| BootstrapQuote { recovery: q.recovery + d, ..*q }).collect();
                if q.iter().any(|q| !(0.0..1.0).contains(&q.recovery)) {
                    ShiftResult { shift: *shift, status: "out_of_range", measures: None, floored_nodes: 0 }
                } else {
                    run(*shift, &q, (c.discount, false), c.settings, recovery + d, c.plans.base)
                }
            }
            Shift::DiscountUp1bp => {
                let own;
                let (curve, plan) = match c.plans.discount_up {
                    Some((curve, plan)) => (curve.as_ref(), plan.as_ref()),
                    None => {
                        own = shifted_discount(c.discount, 1.0);
                        (own.as_ref(), None)
                    }
                };
                match curve {
                    Some(d) => run(*shift, c.quotes, (d, true), c.settings, recovery, plan),
                    None => ShiftResult { shift: *shift, status: "not_built", measures: None, floored_nodes: 0 },
                }
            }
            Shift::AccrualStandard | Shift::AccrualExact => {
                let (accrual, plan) = if *shift == Shift::AccrualStandard {
                    (AccrualIntegration::Standard, c.plans.standard)
                } else {
                    (AccrualIntegration::Exact, c.plans.exact)
                };
                if accrual == c.settings.accrual {
                    ShiftResult { shift: *shift, status: "not_applicable", measures: None, floored_nodes: 0 }
                } else {
                    run(
                        *shift,
                        c.quotes,
                        (c.discount, false),
                        &BootstrapSettings { accrual, ..*c.settings },
                        recovery,
                        plan,
                    )
                }
            }
            Shift::OtherInfeasiblePolicy => {
                let infeasible = match c.settings.infeasible {
                    InfeasiblePolicy::Floor => InfeasiblePolicy::Fail,
                    InfeasiblePolicy::Fail => InfeasiblePolicy::Floor,
                };
                run(
                    *shift,
                    c.quotes,
                    (c.discount, false),
                    &BootstrapSettings { infeasible, ..*c.settings },
                    recovery,
                    c.plans.base,
                )
            }
        };
        out.push(r);
    }
    out
}

/// Which curve dates get the shifts (the run's table `sensitivities`).
#[derive(Debug, Clone, Default, PartialEq)]
pub enum SensitivityDates {
    /// None.
    #[default]
    Off,
    /// The last business day of each month (the run's calendar).
    MonthEnds,
    /// The dates listed.
    Dates(std::collections::BTreeSet<NaiveDate>),
}

/// Recorded as the pipeline file writes it: `"month_ends"`, `"off"` or the list of dates.
impl serde::Serialize for SensitivityDates {
    fn serialize<S: serde::Serializer>(&self, s: S) -> std::result::Result<S::Ok, S::Error> {
        match self {
            SensitivityDates::Off => s.serialize_str("off"),
            SensitivityDates::MonthEnds => s.serialize_str("month_ends"),
            SensitivityDates::Dates(d) => s.collect_seq(d.iter().map(|d| d.to_string())),
        }
    }
}

impl SensitivityDates {
    pub fn contains(&self, d: NaiveDate, cal: &Calendar) -> bool {
        match self {
            SensitivityDates::Off => false,
            SensitivityDates::Dates(s) => s.contains(&d),
            SensitivityDates::MonthEnds => {
                if !cal.is_business_day(d) {
                    return false;
                }
                let mut n = d;
                loop {
                    match n.succ_opt() {
                        Some(x) => n = x,
                        None => return true,
                    }
                    if cal.is_business_day(n) {
                        return chrono::Datelike::month(&n) != chrono::Datelike::month(&d);
                    }
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn inputs<'a>(
        quotes: &'a [BootstrapQuote],
        d: &'a DiscountCurve,
        cal: &'a Calendar,
        s: &'a BootstrapSettings,
    ) -> CurveInputs<'a> {
        CurveInputs {
            trade_date: NaiveDate::from_ymd_opt(2024, 3, 4).unwrap(),
            quotes,
            discount: d,
            calendar: cal,
            settings: s,
            coupon: 0.01,
            plans: SharedPlans::default(),
        }
    }

    /// Shared plans (the run's, the discount shift's, the accrual variants') give every shift
    /// the same numbers, bit for bit, as plans built per shift; for par spreads, upfronts, and
    /// both accrual variants as the run's own.
    #[test]
    fn shared_plans_give_the_same_numbers() {
        let t = NaiveDate::from_ymd_opt(2024, 3, 4).unwrap();
        let d = DiscountCurve::flat(t, 0.03);
        let cal = Calendar::weekends_only();
        for accrual in [AccrualIntegration::Standard, AccrualIntegration::Exact] {
            let s = BootstrapSettings { accrual, ..BootstrapSettings::default() };
            let mut q = quotes(250.0, 0.4);
            q[2].quote = CdsQuote::Upfront { upfront: 0.05, coupon: 0.01 };
            let own = curve_sensitivities(&inputs(&q, &d, &cal, &s));
            let terms: Vec<_> = q.iter().map(BootstrapQuote::term).collect();
            let base = BootstrapPlan::for_terms(t, &terms, &d, &cal, accrual);
            let owned = SharedPlans::build(t, &terms, &d, &cal, &s);
            let shared =
                curve_sensitivities(&CurveInputs { plans: owned.shared(Some(&base)), ..inputs(&q, &d, &cal, &s) });
            assert!(own.iter().filter(|r| r.status == "ok").count() >= 6, "{own:?}");
            assert_eq!(format!("{own:?}"), format!("{shared:?}"));
        }
    }

    /// The measures on the contract and grids kept for the curve's shifts are those of
    /// `price_legs` on a contract and grid built for each: one kept set over curves of
    /// different node times, the day's and the shifted discount curve, both accrual variants
    /// and two recoveries, asked in an order that finds kept grids and makes new ones.
    #[test]
    fn measures_on_kept_grids_are_the_priced_legs() {
        let t = NaiveDate::from_ymd_opt(2024, 3, 4).unwrap();
        let cal = Calendar::weekends_only();
        let d = DiscountCurve::flat(t, 0.03);
        let up = shifted_discount(&d, 1.0).unwrap();
        let s = BootstrapSettings::default();
        let q = quotes(120.0, 0.4);
        let c = inputs(&q, &d, &cal, &s);
        let curves = [
            HazardCurve::new(t, vec![1.0, 3.0, 5.0, 7.0], vec![0.01, 0.02, 0.025, 0.03]).unwrap(),
            HazardCurve::new(t, vec![1.0, 3.0, 5.0, 7.0], vec![0.011, 0.019, 0.026, 0.03]).unwrap(),
            HazardCurve::new(t, vec![0.5, 2.0, 5.5], vec![0.004, 0.05, 0.02]).unwrap(),
        ];
        let mut five = FiveYear::default();
        let contract = CdsContract::standard(t, Tenor::from_months(60).unwrap(), &cal).unwrap();
        let mut asked = 0;
        for round in 0..2 {
            for (i, h) in curves.iter().enumerate() {
                for (disc, shifted) in [(&d, false), (&up, true)] {
                    for accrual in [AccrualIntegration::Standard, AccrualIntegration::Exact] {
                        let recovery = if (i + round) % 2 == 0 { 0.4 } else { 0.35 };
                        let got = measures(&c, h, (disc, shifted), recovery, accrual, &mut five).unwrap();
                        let legs = price_legs(&contract, recovery, disc, h, accrual).unwrap();
                        assert_eq!(got.upfront_5y.to_bits(), legs.upfront(c.coupon).to_bits());
                        assert_eq!(got.pd_1y.to_bits(), (1.0 - h.survival_at(1.0)).to_bits());
                        assert_eq!(got.hazard_5y.to_bits(), h.hazard_at(5.0).to_bits());
                        asked += 1;
                    }
                }
            }
        }
        // Two node-time sets x two discount curves x two accrual variants.
        assert_eq!((asked, five.grids.len()), (24, 8));
    }

    fn quotes(spread_bp: f64, recovery: f64) -> Vec<BootstrapQuote> {
        [12, 36, 60, 84]
            .iter()
            .map(|&m| BootstrapQuote {
                tenor: Tenor::from_months(m).unwrap(),
                quote: CdsQuote::ParSpread(spread_bp / 1e4),
                recovery,
                maturity: None,
            })
            .collect()
    }

    /// Quotes +1 bp: the re-bootstrapped curve is the curve of the bumped quotes (the shift
    /// is a finite difference, checked against bootstrapping the bumped quotes directly);
    /// the 5Y upfront at a 100 bp coupon moves by about RA x 1 bp (the CS01 of a par
    /// contract is its risky annuity per bp of spread: common practice, no source).
    #[test]
    fn cs01_is_the_risky_annuity_per_bp() {
        let t = NaiveDate::from_ymd_opt(2024, 3, 4).unwrap();
        let d = DiscountCurve::flat(t, 0.03);
        let cal = Calendar::weekends_only();
        let s = BootstrapSettings::default();
        let q = quotes(100.0, 0.4);
        let r = curve_sensitivities(&inputs(&q, &d, &cal, &s));
        assert_eq!(r.iter().map(|x| x.shift).collect::<Vec<_>>(), Shift::ALL.to_vec());
        assert!(r.iter().all(|x| x.status == "ok"), "{r:?}");
        let (base, up) = (r[0].measures.unwrap(), r[1].measures.unwrap());
        let direct = curve_sensitivities(&inputs(&quotes(101.0, 0.4), &d, &cal, &s))[0].measures.unwrap();
        assert_eq!(up, direct);
        let k = CdsContract::standard(t, Tenor::from_months(60).unwrap(), &cal).unwrap();
        let h = bootstrap(t, &q, &d, &cal, &s).unwrap().curve.unwrap();
        let legs = price_legs(&k, 0.4, &d, &h, s.accrual).unwrap();
        let ra = legs.risky_annuity() / legs.cash_settle_df;
        let cs01 = up.upfront_5y - base.upfront_5y;
        assert!((cs01 / (ra * 1e-4) - 1.0).abs() < 0.01, "CS01 {cs01} vs RA x 1bp {}", ra * 1e-4);
        // The 5Y contract at its par spread is worth nothing at the quoted coupon.
        assert!(base.upfront_5y.abs() < 1e-12, "{}", base.upfront_5y);
    }

    /// Recovery +5 points at fixed spreads raises the hazards by about (1 - R) / (1 - R - 0.05)
    /// (the credit triangle lambda = s / (1 - R): common practice, no source); a 1 bp higher
    /// discount curve moves the hazards a little; the accrual variants move them by less than
    /// 1e-3 relative; the fail policy on a curve without infeasible nodes changes nothing.
    #[test]
    fn recovery_discount_and_choices_move_the_curve_as_expected() {
        let t = NaiveDate::from_ymd_opt(2024, 3, 4).unwrap();
        let d = DiscountCurve::flat(t, 0.03);
        let cal = Calendar::weekends_only();
        let s = BootstrapSettings::default();
        let q = quotes(200.0, 0.4);
        let r = curve_sensitivities(&inputs(&q, &d, &cal, &s));
        let m = |i: usize| r[i].measures.unwrap();
        let ratio = m(2).hazard_5y / m(0).hazard_5y;
        assert!((ratio / (0.6 / 0.55) - 1.0).abs() < 0.005, "{ratio}");
        let ratio = m(3).hazard_5y / m(0).hazard_5y;
        assert!((ratio / (0.6 / 0.65) - 1.0).abs() < 0.005, "{ratio}");
        assert!((m(4).hazard_5y / m(0).hazard_5y - 1.0).abs() < 1e-3);
        assert_ne!(m(4).hazard_5y, m(0).hazard_5y);
        for i in [5, 6] {
            assert!((m(i).hazard_5y / m(0).hazard_5y - 1.0).abs() < 1e-3, "{:?}", r[i]);
        }
        assert_eq!(m(7), m(0));
        // Shifted discount: every zero rate 1 bp up.
        let up = shifted_discount(&d, 1.0).unwrap();
        for days in [30, 365, 2000, 9000] {
            let x = t + chrono::Days::new(days);
            assert!((up.zero_rate(x) - d.zero_rate(x) - 1e-4).abs() < 1e-14);
        }
    }

    /// An inverted curve that needs a negative hazard is floored under `floor` and fails under
    /// `fail`; a recovery shift that leaves [0, 1) is refused.
    #[test]
    fn the_other_policy_and_out_of_range_recovery_are_reported() {
        let t = NaiveDate::from_ymd_opt(2024, 3, 4).unwrap();
        let d = DiscountCurve::flat(t, 0.03);
        let cal = Calendar::weekends_only();
        let s = BootstrapSettings::default();
        let mut q = quotes(300.0, 0.02);
        q[1].quote = CdsQuote::ParSpread(0.005);
        let r = curve_sensitivities(&inputs(&q, &d, &cal, &s));
        assert_eq!(r[0].status, "ok");
        assert!(r[0].floored_nodes >= 1);
        assert_eq!(r[7].status, "failed");
        assert_eq!(r[3].status, "out_of_range");
    }
}
