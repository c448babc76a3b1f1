//! The standard CDS premium schedule: quarterly on the CDS IMM dates, adjusted Following,
//! the maturity unadjusted, Actual/360 accrual with the maturity day counted in the last
//! period. The first accrual period may start before the trade date.

use super::{add_days, add_months, imm, Calendar};
use chrono::NaiveDate;

/// One premium period of a CDS.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct CouponPeriod {
    pub accrual_start: NaiveDate,
    pub accrual_end: NaiveDate,
    pub payment: NaiveDate,
    /// Days counted for the Actual/360 accrual (the last period includes the maturity day).
    pub accrual_days: i64,
}

impl CouponPeriod {
    /// Accrual fraction per unit of running coupon.
    pub fn accrual_fraction(&self) -> f64 {
        self.accrual_days as f64 / 360.0
    }
}

/// The unadjusted quarterly date on which the premium schedule of a trade starts: with
/// eff = T + 1, p = the IMM date on or before eff; the first date is p - 3 months when
/// adjust(p) is after eff, else p.
pub fn first_schedule_date(trade: NaiveDate, cal: &Calendar) -> NaiveDate {
    let eff = add_days(trade, 1);
    let p = imm::imm_on_or_before(eff);
    if cal.following(p) > eff {
        add_months(p, -3)
    } else {
        p
    }
}

/// The premium schedule from the trade date to `maturity` (an IMM date, unadjusted).
///
/// Dates run quarterly from [`first_schedule_date`]; every date but the maturity is adjusted
/// Following; a date whose adjusted value repeats the previous one is skipped. Each coupon is
/// paid on the adjusted end of its accrual period.
pub fn cds_schedule(trade: NaiveDate, maturity: NaiveDate, cal: &Calendar) -> Vec<CouponPeriod> {
    let start = first_schedule_date(trade, cal);
    let mut dates: Vec<NaiveDate> = Vec::with_capacity(48);
    let mut k = 0;
    loop {
        let unadj = add_months(start, 3 * k);
        if unadj >= maturity {
            break;
        }
        let adj = cal.following(unadj);
        if dates.last() != Some(&adj) {
            dates.push(adj);
        }
        k += 1;
    }
    if dates.last().is_some_and(|&last| last >= maturity) {
        // An adjusted date can run past an unadjusted maturity only if the maturity is a
        // non-business day just after it; the maturity then ends the previous period.
        dates.pop();
    }
    dates.push(maturity);
    periods_from_dates(&dates, cal)
}

/// The premium schedules of several contracts traded on the same day, one per maturity
/// (unadjusted IMM dates, any order). The schedule of the longest is built once; each shorter
/// one is its prefix up to that maturity, with the maturity (unadjusted) ending the last
/// period. Equal, period for period, to calling [`cds_schedule`] for each maturity.
pub fn cds_schedules(trade: NaiveDate, maturities: &[NaiveDate], cal: &Calendar) -> Vec<Vec<CouponPeriod>> {
    let Some(&longest) = maturities.iter().max() else { return Vec::new() };
    let long = cds_schedule(trade, longest, cal);
    maturities
        .iter()
        .map(|&m| {
            if m == longest {
                return long.clone();
            }
            let end = cal.following(m);
            match long.iter().position(|p| p.accrual_end == end) {
                Some(j) => {
                    let mut v = long[..=j].to_vec();
                    let last = v.last_mut().expect("j is in range");
                    last.accrual_end = m;
                    last.payment = end;
                    last.accrual_days = (m - last.accrual_start).num_days() + 1;
                    v
                }
                // Not on the long schedule's dates (not an IMM date of the same roll): build it.
                None => cds_schedule(trade, m, cal),
            }
        })
        .collect()
}

/// Coupon periods from schedule dates (all adjusted but the last).
fn periods_from_dates(dates: &[NaiveDate], cal: &Calendar) -> Vec<CouponPeriod> {
    let n = dates.len();
    let mut out = Vec::with_capacity(n.saturating_sub(1));
    for i in 0..n.saturating_sub(1) {
        let (s, e) = (dates[i], dates[i + 1]);
        let last = i + 2 == n;
        let days = (e - s).num_days() + if last { 1 } else { 0 };
        out.push(CouponPeriod { accrual_start: s, accrual_end: e, payment: cal.following(e), accrual_days: days });
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use chrono::Datelike;

    fn d(y: i32, m: u32, day: u32) -> NaiveDate {
        NaiveDate::from_ymd_opt(y, m, day).unwrap()
    }

    #[test]
    fn schedule_of_a_trade_on_the_day_before_the_roll() {
        // 19 Mar 2024 (Tue), 1Y: maturity 20 Dec 2024 by the semi-annual roll; eff = 20 Mar
        // is itself an IMM date, so the first period starts there (rule 4 of the contract).
        let cal = Calendar::weekends_only();
        let s = cds_schedule(d(2024, 3, 19), d(2024, 12, 20), &cal);
        let starts: Vec<_> = s.iter().map(|c| c.accrual_start).collect();
        assert_eq!(starts, vec![d(2024, 3, 20), d(2024, 6, 20), d(2024, 9, 20)]);
        assert_eq!(s.last().unwrap().accrual_end, d(2024, 12, 20));
        assert_eq!(s.last().unwrap().accrual_days, 92); // 20 Sep..20 Dec is 91 days, plus one
        assert_eq!(s[0].accrual_days, 92);
    }

    #[test]
    fn first_period_starts_before_the_trade_after_the_roll() {
        // 21 Mar 2024 (Thu): eff = 22 Mar, p = 20 Mar, adjust(p) <= eff, so accrual starts
        // 20 Mar 2024, before the trade date (the buyer is rebated 2 days at settlement).
        let cal = Calendar::weekends_only();
        let s = cds_schedule(d(2024, 3, 21), d(2029, 6, 20), &cal);
        assert_eq!(s[0].accrual_start, d(2024, 3, 20));
        assert_eq!(s.len(), 21);
        // 20 Jul 2024 is a Saturday: adjusted to Monday 22 Jul, and the next period starts there.
        assert_eq!(s[1].accrual_end, d(2024, 9, 20));
        let jul = s.iter().find(|c| c.accrual_end.month() == 7);
        assert!(jul.is_none());
        // 20 Apr 2025 is a Sunday... not an IMM month; 20 Sep 2025 is a Saturday.
        let sep25 = s.iter().find(|c| c.accrual_start.year() == 2025 && c.accrual_start.month() == 9).unwrap();
        assert_eq!(sep25.accrual_start, d(2025, 9, 22));
        let prev = s.iter().find(|c| c.accrual_end == d(2025, 9, 22)).unwrap();
        assert_eq!(prev.payment, d(2025, 9, 22));
    }

    #[test]
    fn shared_schedules_equal_separate_ones() {
        use crate::time::{imm::cds_maturity, Tenor};
        let cal = Calendar::weekends_only();
        let tenors: Vec<Tenor> =
            [6, 12, 24, 36, 48, 60, 84, 120, 180].iter().map(|&m| Tenor::from_months(m).unwrap()).collect();
        let mut d = d(2019, 1, 1);
        for _ in 0..800 {
            d = d.succ_opt().unwrap();
            let mats: Vec<NaiveDate> = tenors.iter().filter_map(|&t| cds_maturity(d, t).ok()).collect();
            let shared = cds_schedules(d, &mats, &cal);
            for (m, s) in mats.iter().zip(&shared) {
                assert_eq!(*s, cds_schedule(d, *m, &cal), "trade {d} maturity {m}");
            }
        }
    }

    #[test]
    fn weekend_roll_date_pushes_first_period_back() {
        // 20 Apr 2024 is a Saturday; 20 Jul 2024 a Saturday too (adjusted to 22 Jul).
        let cal = Calendar::weekends_only();
        // Trade Fri 19 Jul 2024: eff = 20 Jul; p = 20 Jun (Thu), adjust(p) = 20 Jun <= eff.
        assert_eq!(first_schedule_date(d(2024, 7, 19), &cal), d(2024, 6, 20));
        // Trade Thu 19 Dec 2024 -> eff 20 Dec (Fri) = p, adjust(p) = p <= eff.
        assert_eq!(first_schedule_date(d(2024, 12, 19), &cal), d(2024, 12, 20));
        // 20 Mar 2021 was a Saturday: trade Fri 19 Mar 2021 -> eff Sat 20 Mar = p,
        // adjust(p) = Mon 22 Mar > eff, so the schedule starts 20 Dec 2020.
        assert_eq!(first_schedule_date(d(2021, 3, 19), &cal), d(2020, 12, 20));
        // Trade Sat? Not a business day, but the rule still applies: trade Sun 21 Mar 2021,
        // eff 22 Mar, p = 20 Mar, adjust(p) = 22 Mar = eff, not after it.
        assert_eq!(first_schedule_date(d(2021, 3, 21), &cal), d(2021, 3, 20));
    }
}
