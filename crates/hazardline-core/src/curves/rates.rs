//! The standard discount curve from deposit and swap quotes.
//!
//! Each currency has a convention ([`RateConvention`]): the spot lag in business days, the
//! deposits' day count, and the par swaps' fixed-leg frequency and day count (the floating leg
//! is valued at par on the same curve, so its own tenor does not enter the single-curve
//! bootstrap: a floating leg paying the curve's own forwards is worth DF(spot) - DF(end)).
//! Dates: spot = T + spot lag business days; an instrument of tenor n months ends at spot + n
//! months, Modified Following; a swap's fixed dates step back from the unadjusted end by the
//! fixed period, each adjusted Modified Following. Pillars sit at each instrument's end date;
//! ln DF is linear in Act/365F time between pillars from DF(T) = 1 (the interpolation of
//! [`DiscountCurve`]), and each pillar is solved in turn, in date order, so that its
//! instrument reprices exactly:
//!
//! - deposit: DF(spot) / DF(end) = 1 + r tau(spot, end), tau on the deposit day count;
//! - swap: r sum_i tau_i DF(t_i) = DF(spot) - DF(end), tau_i on the fixed day count.
//!
//! Checked against QuantLib's piecewise log-linear discount curve from deposit and swap rate
//! helpers (tests/reference/rate_curve_quantlib.py).

use super::DiscountCurve;
use crate::time::{add_months, BusinessDayConvention, Calendar, DayCount, Tenor};
use chrono::NaiveDate;

/// A rate instrument of the standard curve.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum RateInstrument {
    Deposit,
    Swap,
}
crate::text_form!(RateInstrument { Deposit => "deposit", Swap => "swap" });

/// One quote of the standard curve.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RateQuote {
    pub instrument: RateInstrument,
    pub tenor: Tenor,
    /// Decimal rate.
    pub rate: f64,
}

/// A currency's conventions for the standard curve.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RateConvention {
    /// Business days from the curve date to spot.
    pub spot_lag: u32,
    pub deposit_day_count: DayCount,
    /// Months between fixed-leg payments.
    pub fixed_months: u32,
    pub fixed_day_count: DayCount,
    /// Tenor of the floating index in months (recorded; see the module notes).
    pub float_months: u32,
}

impl RateConvention {
    /// The default conventions of the standard curve for USD, EUR, GBP and JPY (common practice
    /// for these markets, recalled from memory, no single source; every field can be set in the
    /// pipeline file): spot lag 2 (GBP 0), deposits Act/360 (GBP Act/365F), fixed legs
    /// semi-annual 30/360 (USD), annual 30/360 (EUR), semi-annual Act/365F (GBP, JPY), floating
    /// 3M (USD) or 6M (EUR, GBP, JPY).
    pub fn default_for(currency: &str) -> Option<RateConvention> {
        let c = |spot_lag, deposit_day_count, fixed_months, fixed_day_count, float_months| RateConvention {
            spot_lag,
            deposit_day_count,
            fixed_months,
            fixed_day_count,
            float_months,
        };
        match currency {
            "USD" => Some(c(2, DayCount::Act360, 6, DayCount::Thirty360, 3)),
            "EUR" => Some(c(2, DayCount::Act360, 12, DayCount::Thirty360, 6)),
            "GBP" => Some(c(0, DayCount::Act365Fixed, 6, DayCount::Act365Fixed, 6)),
            "JPY" => Some(c(2, DayCount::Act360, 6, DayCount::Act365Fixed, 6)),
            _ => None,
        }
    }
}

/// One solved pillar.
#[derive(Debug, Clone, PartialEq)]
pub struct RatePillar {
    pub instrument: RateInstrument,
    pub tenor: Tenor,
    pub rate: f64,
    /// The instrument's end date (the pillar).
    pub pillar: NaiveDate,
    pub discount_factor: f64,
    /// The instrument's rate repriced on the finished curve minus the quote (decimal).
    pub residual: f64,
}

/// Why a standard curve cannot be built.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum RateCurveError {
    #[error("no rate quotes")]
    Empty,
    #[error("{first} and {second} end on the same date {pillar}")]
    SamePillar { first: String, second: String, pillar: NaiveDate },
    #[error("{what}: rate {rate} is not a finite number")]
    BadRate { what: String, rate: f64 },
    #[error("{what} ends on {pillar}, not after spot {spot}")]
    NotAfterSpot { what: String, pillar: NaiveDate, spot: NaiveDate },
    #[error("{what}: no discount factor in [exp(-20), exp(5)] reprices rate {rate}")]
    NoRoot { what: String, rate: f64 },
}

struct Prepared {
    quote: RateQuote,
    end: NaiveDate,
    /// Swap fixed periods: (accrual start, end, year fraction); empty for a deposit.
    fixed: Vec<(NaiveDate, NaiveDate, f64)>,
    /// Deposit year fraction.
    tau: f64,
}

fn label(q: &RateQuote) -> String {
    format!("{} {}", q.instrument.as_str(), q.tenor)
}

/// The fixed periods of a swap from `spot` to the unadjusted end `end_unadj`: dates step back
/// from the end by `months`, each adjusted Modified Following; the first starts at spot.
fn fixed_periods(
    spot: NaiveDate,
    end_unadj: NaiveDate,
    months: u32,
    dc: DayCount,
    cal: &Calendar,
) -> Vec<(NaiveDate, NaiveDate, f64)> {
    let mut dates = vec![end_unadj];
    let mut k = 1;
    loop {
        let d = add_months(end_unadj, -((k * months) as i32));
        if d <= spot {
            break;
        }
        dates.push(d);
        k += 1;
    }
    dates.push(spot);
    dates.reverse();
    let adj: Vec<NaiveDate> = dates
        .iter()
        .enumerate()
        .map(|(i, &d)| if i == 0 { d } else { cal.adjust(d, BusinessDayConvention::ModifiedFollowing) })
        .collect();
    adj.windows(2).map(|w| (w[0], w[1], dc.year_fraction(w[0], w[1]))).collect()
}

fn error_of(p: &Prepared, spot: NaiveDate, curve: &DiscountCurve) -> f64 {
    let df_spot = curve.df(spot);
    let df_end = curve.df(p.end);
    match p.quote.instrument {
        RateInstrument::Deposit => (df_spot / df_end).ln() - (1.0 + p.quote.rate * p.tau).ln(),
        RateInstrument::Swap => {
            let annuity: f64 = p.fixed.iter().map(|&(_, e, tau)| tau * curve.df(e)).sum();
            p.quote.rate * annuity - (df_spot - df_end)
        }
    }
}

/// The rate `p` implies on `curve`.
fn implied_rate(p: &Prepared, spot: NaiveDate, curve: &DiscountCurve) -> f64 {
    let (df_spot, df_end) = (curve.df(spot), curve.df(p.end));
    match p.quote.instrument {
        RateInstrument::Deposit => (df_spot / df_end - 1.0) / p.tau,
        RateInstrument::Swap => {
            let annuity: f64 = p.fixed.iter().map(|&(_, e, tau)| tau * curve.df(e)).sum();
            (df_spot - df_end) / annuity
        }
    }
}

/// The par rates of `instruments` on `curve` (a curve referenced on `trade`): what a deposit
/// or swap of each tenor would be quoted at, with the same dates and day counts as
/// [`build_rate_curve`]. Used to write the standard-curve quotes of an invented universe.
pub fn par_rates(
    trade: NaiveDate,
    curve: &DiscountCurve,
    instruments: &[(RateInstrument, Tenor)],
    conv: &RateConvention,
    cal: &Calendar,
) -> Vec<f64> {
    let spot = spot_date(trade, conv, cal);
    instruments
        .iter()
        .map(|&(instrument, tenor)| {
            let p = prepare(RateQuote { instrument, tenor, rate: 0.0 }, spot, conv, cal);
            implied_rate(&p, spot, curve)
        })
        .collect()
}

fn spot_date(trade: NaiveDate, conv: &RateConvention, cal: &Calendar) -> NaiveDate {
    if conv.spot_lag == 0 {
        cal.adjust(trade, BusinessDayConvention::Following)
    } else {
        cal.add_business_days(trade, conv.spot_lag as i32)
    }
}

fn prepare(q: RateQuote, spot: NaiveDate, conv: &RateConvention, cal: &Calendar) -> Prepared {
    let end_unadj = add_months(spot, q.tenor.months() as i32);
    let end = cal.adjust(end_unadj, BusinessDayConvention::ModifiedFollowing);
    let (fixed, tau) = match q.instrument {
        RateInstrument::Deposit => (Vec::new(), conv.deposit_day_count.year_fraction(spot, end)),
        RateInstrument::Swap => (fixed_periods(spot, end_unadj, conv.fixed_months, conv.fixed_day_count, cal), 0.0),
    };
    Prepared { quote: q, end, fixed, tau }
}

/// Builds the standard curve of `trade` from deposit and swap quotes (see the module notes).
pub fn build_rate_curve(
    trade: NaiveDate,
    quotes: &[RateQuote],
    conv: &RateConvention,
    cal: &Calendar,
) -> Result<(DiscountCurve, Vec<RatePillar>), RateCurveError> {
    if quotes.is_empty() {
        return Err(RateCurveError::Empty);
    }
    let spot = spot_date(trade, conv, cal);
    let mut prepared: Vec<Prepared> = Vec::with_capacity(quotes.len());
    for q in quotes {
        if !q.rate.is_finite() {
            return Err(RateCurveError::BadRate { what: label(q), rate: q.rate });
        }
        let p = prepare(*q, spot, conv, cal);
        if p.end <= spot {
            return Err(RateCurveError::NotAfterSpot { what: label(q), pillar: p.end, spot });
        }
        prepared.push(p);
    }
    prepared.sort_by_key(|p| p.end);
    if let Some(w) = prepared.windows(2).find(|w| w[0].end == w[1].end) {
        return Err(RateCurveError::SamePillar {
            first: label(&w[0].quote),
            second: label(&w[1].quote),
            pillar: w[0].end,
        });
    }
    let mut pillars: Vec<(NaiveDate, f64)> = Vec::with_capacity(prepared.len());
    let mut trial = Vec::with_capacity(prepared.len());
    for p in &prepared {
        // The trial curve, the pillars so far and the new one, is built once per pillar; each
        // step of the search sets the new pillar's ln DF and prices on it. Whether the curve
        // builds does not depend on that value (while it is finite), so this is the curve a
        // build from the trial pillars would give at every step, bit for bit
        // (`trial_pillar_set_is_the_rebuilt_curve`).
        trial.clear();
        trial.extend_from_slice(&pillars);
        trial.push((p.end, 0.0));
        let built = DiscountCurve::from_log_discount_factors(trade, &trial).ok();
        let slot = built.as_ref().and_then(|c| c.pillar_dates().binary_search(&p.end).ok());
        let curve = std::cell::RefCell::new(built);
        let f = |x: f64| -> Option<f64> {
            let (mut c, slot) = (curve.borrow_mut(), slot?);
            let c = c.as_mut().filter(|_| x.is_finite())?;
            c.set_pillar_log_df(slot, x);
            Some(error_of(p, spot, c))
        };
        // The error is monotone in ln DF at the new pillar (falling for a deposit, rising for
        // a swap): bisection on [-20, 5] to the last bit, in whichever direction it runs.
        let (mut lo, mut hi) = (-20.0f64, 5.0f64);
        let rising = match (f(lo), f(hi)) {
            (Some(a), Some(b)) if a < 0.0 && b > 0.0 => true,
            (Some(a), Some(b)) if a > 0.0 && b < 0.0 => false,
            _ => return Err(RateCurveError::NoRoot { what: label(&p.quote), rate: p.quote.rate }),
        };
        for _ in 0..200 {
            let mid = 0.5 * (lo + hi);
            if mid <= lo || mid >= hi {
                break;
            }
            match f(mid) {
                Some(v) if (v < 0.0) == rising => lo = mid,
                Some(_) => hi = mid,
                None => return Err(RateCurveError::NoRoot { what: label(&p.quote), rate: p.quote.rate }),
            }
        }
        // Of the two ends, the one with the smaller error.
        let x = match (f(lo), f(hi)) {
            (Some(a), Some(b)) if a.abs() <= b.abs() => lo,
            _ => hi,
        };
        pillars.push((p.end, x));
    }
    let curve = DiscountCurve::from_log_discount_factors(trade, &pillars)
        .map_err(|_| RateCurveError::NoRoot { what: "curve".into(), rate: f64::NAN })?;
    let out = prepared
        .iter()
        .zip(&pillars)
        .map(|(p, &(d, x))| RatePillar {
            instrument: p.quote.instrument,
            tenor: p.quote.tenor,
            rate: p.quote.rate,
            pillar: d,
            discount_factor: x.exp(),
            residual: implied_rate(p, spot, &curve) - p.quote.rate,
        })
        .collect();
    Ok((curve, out))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Par rates read off a curve rebuild that curve's discount factors at the instruments'
    /// end dates (the build and the read-off invert each other).
    #[test]
    fn par_rates_rebuild_their_curve() {
        let trade = NaiveDate::from_ymd_opt(2024, 5, 17).unwrap();
        let cal = Calendar::weekends_only();
        let tn = |m: u32| Tenor::from_months(m).unwrap();
        let zero = DiscountCurve::from_zero_rates(trade, &[(tn(3), 0.031), (tn(24), 0.029), (tn(120), 0.034)]).unwrap();
        let conv = RateConvention::default_for("EUR").unwrap();
        let instruments: Vec<(RateInstrument, Tenor)> = [1, 3, 6, 12]
            .iter()
            .map(|&m| (RateInstrument::Deposit, tn(m)))
            .chain([24, 36, 60, 84, 120].iter().map(|&m| (RateInstrument::Swap, tn(m))))
            .collect();
        let rates = par_rates(trade, &zero, &instruments, &conv, &cal);
        let quotes: Vec<RateQuote> = instruments
            .iter()
            .zip(&rates)
            .map(|(&(instrument, tenor), &rate)| RateQuote { instrument, tenor, rate })
            .collect();
        let (built, pillars) = build_rate_curve(trade, &quotes, &conv, &cal).unwrap();
        for p in &pillars {
            assert!((p.discount_factor - zero.df(p.pillar)).abs() < 1e-13, "{} {}", p.pillar, p.discount_factor);
            assert!(p.residual.abs() < 1e-13);
        }
        assert!((built.df(pillars[3].pillar) - zero.df(pillars[3].pillar)).abs() < 1e-13);
    }

    /// The search's trial curve with its last pillar's ln DF set is the curve built from the
    /// same pillars, bit for bit: its pillars, its discount factors at dates before, between
    /// and after the pillars, and the pricing error of each instrument on it, for ln DFs over
    /// the search's whole bracket.
    #[test]
    fn trial_pillar_set_is_the_rebuilt_curve() {
        let trade = NaiveDate::from_ymd_opt(2024, 5, 17).unwrap();
        let cal = Calendar::weekends_only();
        let conv = RateConvention::default_for("USD").unwrap();
        let spot = spot_date(trade, &conv, &cal);
        let tn = |m: u32| Tenor::from_months(m).unwrap();
        let prepared: Vec<Prepared> = [(RateInstrument::Deposit, 1), (RateInstrument::Deposit, 6)]
            .into_iter()
            .chain([24, 60, 120].into_iter().map(|m| (RateInstrument::Swap, m)))
            .map(|(instrument, m)| prepare(RateQuote { instrument, tenor: tn(m), rate: 0.03 }, spot, &conv, &cal))
            .collect();
        let probes: Vec<NaiveDate> = (0..4000).step_by(37).map(|d| trade + chrono::Days::new(d)).collect();
        let mut compared = 0;
        for k in 0..prepared.len() {
            let earlier: Vec<(NaiveDate, f64)> =
                prepared[..k].iter().enumerate().map(|(i, p)| (p.end, -0.01 - 0.02 * i as f64)).collect();
            let mut trial = earlier.clone();
            trial.push((prepared[k].end, 0.0));
            let mut set = DiscountCurve::from_log_discount_factors(trade, &trial).unwrap();
            let slot = set.pillar_dates().binary_search(&prepared[k].end).unwrap();
            for x in [-20.0, -7.5, -1.0, -0.123456789, -1e-300, 0.0, 1e-9, 0.37, 5.0] {
                set.set_pillar_log_df(slot, x);
                let mut pillars = earlier.clone();
                pillars.push((prepared[k].end, x));
                let rebuilt = DiscountCurve::from_log_discount_factors(trade, &pillars).unwrap();
                assert_eq!(set, rebuilt);
                for d in &probes {
                    assert_eq!(set.df(*d).to_bits(), rebuilt.df(*d).to_bits());
                }
                for p in &prepared {
                    assert_eq!(error_of(p, spot, &set).to_bits(), error_of(p, spot, &rebuilt).to_bits());
                    compared += 1;
                }
            }
        }
        assert_eq!(compared, 5 * 9 * 5);
    }
}
