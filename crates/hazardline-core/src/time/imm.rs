//! CDS roll dates: the 20th of March, June, September and December, and the standard
//! maturity rule with semi-annual rolls (20 March and 20 September) in force since 2015.

use super::{add_months, Tenor};
use chrono::{Datelike, NaiveDate};

/// True when `date` is the 20th of a quarter-end month.
pub fn is_cds_imm_date(date: NaiveDate) -> bool {
    date.day() == 20 && date.month() % 3 == 0
}

/// The CDS IMM date (20 Mar/Jun/Sep/Dec) on or before `date`.
pub fn imm_on_or_before(date: NaiveDate) -> NaiveDate {
    let (y, m) = (date.year(), date.month());
    let quarter_month = m - (m % 3); // 0, 3, 6, 9 or 12
    let candidate = if quarter_month == 0 { None } else { NaiveDate::from_ymd_opt(y, quarter_month, 20) };
    match candidate {
        Some(c) if c <= date => c,
        Some(c) => add_months(c, -3),
        None => NaiveDate::from_ymd_opt(y - 1, 12, 20).expect("valid date"),
    }
}

/// The CDS IMM date on or after `date`.
pub fn imm_on_or_after(date: NaiveDate) -> NaiveDate {
    let before = imm_on_or_before(date);
    if before == date {
        date
    } else {
        add_months(before, 3)
    }
}

/// Why a CDS maturity cannot be formed.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum MaturityError {
    #[error("tenor {0} is not a whole number of quarters: standard CDS tenors are multiples of 3 months")]
    NotQuarterly(Tenor),
    #[error("tenor {tenor} traded on {trade} rolls to maturity {maturity}, which is not after the protection start")]
    Expired { tenor: Tenor, trade: NaiveDate, maturity: NaiveDate },
}

/// Standard CDS maturity with the semi-annual roll: take the IMM date on or before the trade
/// date; if it is a 20 June or 20 December step it back three months; add the tenor and three
/// more months. The result is always a 20 June or 20 December and is not adjusted.
/// (Trade on 19 Mar 2024: 5Y matures 20 Dec 2028; on 20 Mar 2024: 20 Jun 2029.)
pub fn cds_maturity(trade: NaiveDate, tenor: Tenor) -> Result<NaiveDate, MaturityError> {
    if tenor.months() % 3 != 0 {
        return Err(MaturityError::NotQuarterly(tenor));
    }
    let mut anchor = imm_on_or_before(trade);
    if anchor.month() == 6 || anchor.month() == 12 {
        anchor = add_months(anchor, -3);
    }
    let maturity = add_months(anchor, tenor.months() as i32 + 3);
    if maturity <= trade.succ_opt().unwrap_or(trade) {
        return Err(MaturityError::Expired { tenor, trade, maturity });
    }
    Ok(maturity)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn d(y: i32, m: u32, day: u32) -> NaiveDate {
        NaiveDate::from_ymd_opt(y, m, day).unwrap()
    }

    #[test]
    fn imm_neighbours() {
        assert_eq!(imm_on_or_before(d(2024, 3, 19)), d(2023, 12, 20));
        assert_eq!(imm_on_or_before(d(2024, 3, 20)), d(2024, 3, 20));
        assert_eq!(imm_on_or_before(d(2024, 2, 29)), d(2023, 12, 20));
        assert_eq!(imm_on_or_before(d(2024, 1, 5)), d(2023, 12, 20));
        assert_eq!(imm_on_or_before(d(2024, 12, 31)), d(2024, 12, 20));
        assert_eq!(imm_on_or_after(d(2024, 3, 21)), d(2024, 6, 20));
        assert_eq!(imm_on_or_after(d(2024, 12, 21)), d(2025, 3, 20));
        assert_eq!(imm_on_or_after(d(2024, 9, 20)), d(2024, 9, 20));
    }

    #[test]
    fn semi_annual_roll_examples() {
        // The worked examples of the standard-contract convention (semi-annual roll since 2015).
        let five = Tenor::from_months(60).unwrap();
        assert_eq!(cds_maturity(d(2024, 3, 19), five).unwrap(), d(2028, 12, 20));
        assert_eq!(cds_maturity(d(2024, 3, 20), five).unwrap(), d(2029, 6, 20));
        assert_eq!(cds_maturity(d(2024, 9, 19), five).unwrap(), d(2029, 6, 20));
        assert_eq!(cds_maturity(d(2024, 9, 20), five).unwrap(), d(2029, 12, 20));
        assert_eq!(cds_maturity(d(2024, 12, 31), five).unwrap(), d(2029, 12, 20));
        let six_m = Tenor::from_months(6).unwrap();
        assert_eq!(cds_maturity(d(2024, 3, 19), six_m).unwrap(), d(2024, 6, 20));
    }

    #[test]
    fn non_quarterly_tenor_is_refused() {
        assert!(matches!(
            cds_maturity(d(2024, 3, 19), Tenor::from_months(1).unwrap()),
            Err(MaturityError::NotQuarterly(_))
        ));
    }
}
