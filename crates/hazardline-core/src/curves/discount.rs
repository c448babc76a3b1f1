//! Risk-free discount curve from continuously compounded zero rates.
//!
//! Pillars sit at reference + tenor (calendar months, clipped to month end, unadjusted); zero
//! rates are Actual/365 Fixed continuously compounded, DF = exp(-z t). Between pillars the
//! log discount factor is linear in t (flat forwards). Before the first pillar the first zero
//! rate holds; after the last, the last forward rate holds.

use super::year_time;
use crate::time::{add_months, Tenor};
use chrono::NaiveDate;

/// A discount curve on the Act/365F axis.
#[derive(Debug, Clone, PartialEq)]
pub struct DiscountCurve {
    reference: NaiveDate,
    /// Pillar dates, strictly increasing, all after the reference date.
    dates: Vec<NaiveDate>,
    /// Pillar times (Act/365F from reference).
    times: Vec<f64>,
    /// ln DF at each pillar (= -z t).
    log_dfs: Vec<f64>,
}

/// Why a discount curve cannot be built.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum DiscountCurveError {
    #[error("discount curve for {reference} has no pillars")]
    Empty { reference: NaiveDate },
    #[error("discount curve for {reference}: two pillars fall on {date} (tenors {first} and {second})")]
    DuplicatePillar { reference: NaiveDate, date: NaiveDate, first: Tenor, second: Tenor },
    #[error("discount curve for {reference}: zero rate {rate} at {tenor} is not a finite number")]
    BadRate { reference: NaiveDate, tenor: Tenor, rate: f64 },
    #[error("discount curve for {reference}: discount factor {factor} on {date} is not a finite positive number")]
    BadFactor { reference: NaiveDate, date: NaiveDate, factor: f64 },
    #[error("discount curve for {reference}: pillar {date} is not after the reference date")]
    PillarNotAfterReference { reference: NaiveDate, date: NaiveDate },
    #[error("discount curve for {reference}: two pillars fall on {date}")]
    DuplicateDate { reference: NaiveDate, date: NaiveDate },
}

impl DiscountCurve {
    /// Builds the curve from (tenor, zero rate) pairs in any order.
    pub fn from_zero_rates(
        reference: NaiveDate,
        pillars: &[(Tenor, f64)],
    ) -> Result<DiscountCurve, DiscountCurveError> {
        if pillars.is_empty() {
            return Err(DiscountCurveError::Empty { reference });
        }
        let mut rows: Vec<(NaiveDate, Tenor, f64)> = Vec::with_capacity(pillars.len());
        for &(tenor, rate) in pillars {
            if !rate.is_finite() {
                return Err(DiscountCurveError::BadRate { reference, tenor, rate });
            }
            rows.push((add_months(reference, tenor.months() as i32), tenor, rate));
        }
        rows.sort_by_key(|r| r.0);
        for w in rows.windows(2) {
            if w[0].0 == w[1].0 {
                return Err(DiscountCurveError::DuplicatePillar {
                    reference,
                    date: w[0].0,
                    first: w[0].1,
                    second: w[1].1,
                });
            }
        }
        let dates: Vec<NaiveDate> = rows.iter().map(|r| r.0).collect();
        let times: Vec<f64> = dates.iter().map(|&d| year_time(reference, d)).collect();
        let log_dfs = rows.iter().zip(&times).map(|(r, &t)| -r.2 * t).collect();
        Ok(DiscountCurve { reference, dates, times, log_dfs })
    }

    /// Builds the curve from (pillar date, discount factor) pairs in any order; the same
    /// log-linear interpolation as [`DiscountCurve::from_zero_rates`] (a pillar on the
    /// reference date with factor 1 is implied).
    pub fn from_discount_factors(
        reference: NaiveDate,
        pillars: &[(NaiveDate, f64)],
    ) -> Result<DiscountCurve, DiscountCurveError> {
        let mut rows: Vec<(NaiveDate, f64)> = Vec::with_capacity(pillars.len());
        for &(date, factor) in pillars {
            if date == reference && factor == 1.0 {
                continue;
            }
            if !(factor > 0.0 && factor.is_finite()) {
                return Err(DiscountCurveError::BadFactor { reference, date, factor });
            }
            if date <= reference {
                return Err(DiscountCurveError::PillarNotAfterReference { reference, date });
            }
            rows.push((date, factor));
        }
        if rows.is_empty() {
            return Err(DiscountCurveError::Empty { reference });
        }
        rows.sort_by_key(|r| r.0);
        if let Some(w) = rows.windows(2).find(|w| w[0].0 == w[1].0) {
            return Err(DiscountCurveError::DuplicateDate { reference, date: w[0].0 });
        }
        let dates: Vec<NaiveDate> = rows.iter().map(|r| r.0).collect();
        let times: Vec<f64> = dates.iter().map(|&d| year_time(reference, d)).collect();
        let log_dfs = rows.iter().map(|r| r.1.ln()).collect();
        Ok(DiscountCurve { reference, dates, times, log_dfs })
    }

    /// A flat continuously compounded curve (for tests and quick checks).
    pub fn flat(reference: NaiveDate, rate: f64) -> DiscountCurve {
        let one_year = Tenor::from_months(12).expect("12 months is a valid tenor");
        DiscountCurve::from_zero_rates(reference, &[(one_year, rate)]).expect("one finite pillar")
    }

    pub fn reference(&self) -> NaiveDate {
        self.reference
    }

    /// Pillar dates, increasing.
    pub fn pillar_dates(&self) -> &[NaiveDate] {
        &self.dates
    }

    /// ln DF at each pillar.
    pub fn pillar_log_dfs(&self) -> &[f64] {
        &self.log_dfs
    }

    /// ln DF at time t (Act/365F years). t may be negative (before the reference date): the
    /// first zero rate then extends backwards, which is what the accrual-on-default formula's
    /// start-of-accrual term needs.
    #[inline]
    pub fn log_df_at(&self, t: f64) -> f64 {
        let n = self.times.len();
        let t0 = self.times[0];
        if t <= t0 {
            // DF = exp(-z0 t): log-linear between (0, 0) and the first pillar.
            return self.log_dfs[0] / t0 * t;
        }
        if t >= self.times[n - 1] {
            if n == 1 {
                return self.log_dfs[0] / t0 * t;
            }
            let (ta, tb) = (self.times[n - 2], self.times[n - 1]);
            let (la, lb) = (self.log_dfs[n - 2], self.log_dfs[n - 1]);
            return lb + (lb - la) / (tb - ta) * (t - tb);
        }
        // First pillar with time >= t.
        let i = self.times.partition_point(|&x| x < t);
        let (ta, tb) = (self.times[i - 1], self.times[i]);
        let (la, lb) = (self.log_dfs[i - 1], self.log_dfs[i]);
        la + (lb - la) * (t - ta) / (tb - ta)
    }

    /// Discount factor at time t.
    #[inline]
    pub fn df_at(&self, t: f64) -> f64 {
        self.log_df_at(t).exp()
    }

    /// Discount factor at a date.
    pub fn df(&self, date: NaiveDate) -> f64 {
        self.df_at(year_time(self.reference, date))
    }

    /// Continuously compounded zero rate to a date (the first rate at or before the reference).
    pub fn zero_rate(&self, date: NaiveDate) -> f64 {
        let t = year_time(self.reference, date);
        if t <= 0.0 {
            return -self.log_dfs[0] / self.times[0];
        }
        -self.log_df_at(t) / t
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn d(y: i32, m: u32, day: u32) -> NaiveDate {
        NaiveDate::from_ymd_opt(y, m, day).unwrap()
    }
    fn tn(s: &str) -> Tenor {
        s.parse().unwrap()
    }

    #[test]
    fn pillars_reprice_their_zero_rates() {
        let r = d(2024, 1, 31);
        let c = DiscountCurve::from_zero_rates(r, &[(tn("1Y"), 0.03), (tn("1M"), 0.02), (tn("5Y"), 0.035)]).unwrap();
        assert_eq!(c.pillar_dates()[0], d(2024, 2, 29)); // month-end clipping in a leap year
        let t = year_time(r, d(2029, 1, 31));
        assert!((c.df(d(2029, 1, 31)) - (-0.035 * t).exp()).abs() < 1e-15);
        assert!((c.zero_rate(d(2024, 2, 29)) - 0.02).abs() < 1e-14);
    }

    #[test]
    fn extrapolation_rules() {
        let r = d(2024, 1, 2);
        let c = DiscountCurve::from_zero_rates(r, &[(tn("1Y"), 0.03), (tn("2Y"), 0.04)]).unwrap();
        // Before the first pillar: the first zero rate.
        assert!((c.zero_rate(d(2024, 4, 2)) - 0.03).abs() < 1e-14);
        // After the last pillar: the last forward rate (flat forwards), log-linear DF.
        let (t1, t2) = (year_time(r, d(2025, 1, 2)), year_time(r, d(2026, 1, 2)));
        let fwd = (0.04 * t2 - 0.03 * t1) / (t2 - t1);
        let t3 = year_time(r, d(2027, 1, 2));
        let expected = -(0.04 * t2 + fwd * (t3 - t2));
        assert!((c.log_df_at(t3) - expected).abs() < 1e-14);
        assert_eq!(c.df(r), 1.0);
    }

    #[test]
    fn duplicate_pillars_are_an_error() {
        let r = d(2024, 1, 2);
        let e = DiscountCurve::from_zero_rates(r, &[(tn("12M"), 0.03), (tn("1Y"), 0.04)]).unwrap_err();
        assert!(matches!(e, DiscountCurveError::DuplicatePillar { .. }));
        assert!(DiscountCurve::from_zero_rates(r, &[]).is_err());
    }
}
