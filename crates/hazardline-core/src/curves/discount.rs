//! Risk-free discount curve from zero rates or discount factors at pillar dates.
//!
//! Pillars sit at reference + tenor (calendar months, clipped to month end, unadjusted) or at
//! given dates. Zero rates are converted to discount factors with their compounding and day
//! count ([`log_df_from_zero_rate`]; continuously compounded Act/365F: DF = exp(-z t)).
//! Between pillars the log discount factor is linear in t on Act/365F (flat forwards). Before
//! the first pillar the first zero rate holds; after the last, the last forward rate holds.

use super::year_time;
use crate::time::{add_months, Tenor};
use chrono::NaiveDate;

/// How a zero rate compounds.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Compounding {
    /// DF = exp(-z t).
    #[default]
    Continuous,
    /// DF = (1 + z)^(-t).
    Annual,
    /// DF = (1 + z/2)^(-2t).
    SemiAnnual,
    /// DF = (1 + z/4)^(-4t).
    Quarterly,
    /// DF = 1 / (1 + z t).
    Simple,
}
crate::text_form!(Compounding {
    Continuous => "continuous",
    Annual => "annual",
    SemiAnnual => "semi_annual",
    Quarterly => "quarterly",
    Simple => "simple",
});

/// The day count of a zero rate's time t.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum RateDayCount {
    /// Actual days / 365.
    #[default]
    Act365F,
    /// Actual days / 360.
    Act360,
}
crate::text_form!(RateDayCount { Act365F => "act365f", Act360 => "act360" });

/// The compounding and day count of the zero rates of a discount table.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct ZeroRateConvention {
    pub compounding: Compounding,
    pub day_count: RateDayCount,
}

/// ln DF at `pillar` of a zero rate `rate` quoted from `reference` with its compounding and
/// day count; None when the rate gives no positive discount factor (1 + z/m <= 0, or
/// 1 + z t <= 0 for simple compounding).
pub fn log_df_from_zero_rate(
    reference: NaiveDate,
    pillar: NaiveDate,
    rate: f64,
    compounding: Compounding,
    day_count: RateDayCount,
) -> Option<f64> {
    let days = (pillar - reference).num_days() as f64;
    let t = match day_count {
        // The same number as `year_time` gives (Act/365F), so a continuously compounded
        // Act/365F rate keeps its pillar's ln DF = -z t exactly.
        RateDayCount::Act365F => year_time(reference, pillar),
        RateDayCount::Act360 => days / 360.0,
    };
    let periodic = |m: f64| (1.0 + rate / m > 0.0).then(|| -m * t * (1.0 + rate / m).ln());
    let v = match compounding {
        Compounding::Continuous => Some(-rate * t),
        Compounding::Annual => periodic(1.0),
        Compounding::SemiAnnual => periodic(2.0),
        Compounding::Quarterly => periodic(4.0),
        Compounding::Simple => (1.0 + rate * t > 0.0).then(|| -(1.0 + rate * t).ln()),
    };
    v.filter(|x| x.is_finite())
}

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
        let mut logs = Vec::with_capacity(pillars.len());
        for &(date, factor) in pillars {
            if !(factor > 0.0 && factor.is_finite()) {
                return Err(DiscountCurveError::BadFactor { reference, date, factor });
            }
            logs.push((date, factor.ln()));
        }
        Self::from_log_discount_factors(reference, &logs)
    }

    /// Builds the curve from (pillar date, ln discount factor) pairs in any order (a pillar on
    /// the reference date with ln DF 0 is implied and may be given).
    pub fn from_log_discount_factors(
        reference: NaiveDate,
        pillars: &[(NaiveDate, f64)],
    ) -> Result<DiscountCurve, DiscountCurveError> {
        let mut rows: Vec<(NaiveDate, f64)> = Vec::with_capacity(pillars.len());
        for &(date, log_df) in pillars {
            if date == reference && log_df == 0.0 {
                continue;
            }
            if !log_df.is_finite() {
                return Err(DiscountCurveError::BadFactor { reference, date, factor: log_df.exp() });
            }
            if date <= reference {
                return Err(DiscountCurveError::PillarNotAfterReference { reference, date });
            }
            rows.push((date, log_df));
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
        let log_dfs = rows.iter().map(|r| r.1).collect();
        Ok(DiscountCurve { reference, dates, times, log_dfs })
    }

    /// A flat continuously compounded curve (for tests and quick checks).
    pub fn flat(reference: NaiveDate, rate: f64) -> DiscountCurve {
        let one_year = Tenor::from_months(12).expect("12 months is a valid tenor");
        DiscountCurve::from_zero_rates(reference, &[(one_year, rate)]).expect("one finite pillar")
    }

    /// Sets the ln DF of the pillar at index `i` (of [`DiscountCurve::pillar_dates`]) to the
    /// finite `log_df`: the curve [`DiscountCurve::from_log_discount_factors`] builds from
    /// the same pillars with that value (a rate curve's search moves its last pillar so).
    pub(crate) fn set_pillar_log_df(&mut self, i: usize, log_df: f64) {
        debug_assert!(log_df.is_finite());
        self.log_dfs[i] = log_df;
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

/// A flat discount curve at 2% and a sloped one (3.1% to 4.1%) with pillars inside 10-year
/// contracts, both referenced on `t`: the curves the bit-for-bit tests of the legs run on.
#[cfg(test)]
pub(crate) fn test_curves(t: NaiveDate) -> [DiscountCurve; 2] {
    let pillars: Vec<(NaiveDate, f64)> = [(90, 0.031), (400, 0.034), (1900, 0.038), (4000, 0.041)]
        .iter()
        .map(|&(d, r)| {
            let p = t + chrono::Days::new(d);
            (p, -r * crate::curves::year_time(t, p))
        })
        .collect();
    [DiscountCurve::flat(t, 0.02), DiscountCurve::from_log_discount_factors(t, &pillars).unwrap()]
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

    #[test]
    fn zero_rates_of_every_compounding_and_day_count() {
        let r = NaiveDate::from_ymd_opt(2024, 1, 2).unwrap();
        let p = NaiveDate::from_ymd_opt(2026, 1, 1).unwrap(); // 730 days
        let ln = |z, c, d| log_df_from_zero_rate(r, p, z, c, d).unwrap();
        // t = 2 (Act/365F) or 730/360 = 2.027778 (Act/360); the closed forms evaluated with
        // Python's math.log: continuous -0.05 x 2 = -0.1; annual -2 ln 1.05 = -0.0975803;
        // semi-annual -4 ln 1.025 = -0.0987705; quarterly -8 ln 1.0125 = -0.0993802; simple
        // -ln 1.1 = -0.0953102; simple Act/360 -ln(1 + 0.05 x 2.027778) = -0.0965720.
        assert_eq!(ln(0.05, Compounding::Continuous, RateDayCount::Act365F), -0.05 * 2.0);
        assert!((ln(0.05, Compounding::Annual, RateDayCount::Act365F) + 0.0975803).abs() < 1e-7);
        assert!((ln(0.05, Compounding::SemiAnnual, RateDayCount::Act365F) + 0.0987705).abs() < 1e-7);
        assert!((ln(0.05, Compounding::Quarterly, RateDayCount::Act365F) + 0.0993802).abs() < 1e-7);
        assert!((ln(0.05, Compounding::Simple, RateDayCount::Act365F) + 0.0953102).abs() < 1e-7);
        assert!((ln(0.05, Compounding::Simple, RateDayCount::Act360) + 0.0965720).abs() < 1e-7);
        // No positive discount factor: refused.
        assert!(log_df_from_zero_rate(r, p, -1.5, Compounding::Annual, RateDayCount::Act365F).is_none());
        assert!(log_df_from_zero_rate(r, p, -0.6, Compounding::Simple, RateDayCount::Act365F).is_none());
    }

    #[test]
    fn discount_factors_by_date_give_the_zero_rate_curve() {
        let r = NaiveDate::from_ymd_opt(2024, 1, 2).unwrap();
        let tn = |s: &str| s.parse::<Tenor>().unwrap();
        let z = DiscountCurve::from_zero_rates(r, &[(tn("1Y"), 0.03), (tn("5Y"), 0.035)]).unwrap();
        let pillars: Vec<(NaiveDate, f64)> =
            z.pillar_dates().iter().zip(z.pillar_log_dfs()).map(|(d, l)| (*d, l.exp())).collect();
        let f = DiscountCurve::from_discount_factors(r, &pillars).unwrap();
        for t in [0.1, 1.0, 2.5, 5.0, 8.0] {
            assert!((f.log_df_at(t) - z.log_df_at(t)).abs() < 1e-15, "{t}");
        }
        let e = DiscountCurve::from_discount_factors(r, &[(r, 0.99)]).unwrap_err();
        assert!(matches!(e, DiscountCurveError::PillarNotAfterReference { .. }), "{e}");
        let d = NaiveDate::from_ymd_opt(2025, 1, 2).unwrap();
        assert!(matches!(
            DiscountCurve::from_discount_factors(r, &[(d, 0.97), (d, 0.96)]),
            Err(DiscountCurveError::DuplicateDate { .. })
        ));
        assert!(matches!(
            DiscountCurve::from_discount_factors(r, &[(d, -0.1)]),
            Err(DiscountCurveError::BadFactor { .. })
        ));
    }
}
