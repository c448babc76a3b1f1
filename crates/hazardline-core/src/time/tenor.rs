//! Tenors such as `6M`, `1Y`, `30Y`: a whole number of calendar months.

use std::fmt;
use std::str::FromStr;

/// A tenor held as calendar months (`1Y` = 12 months). Day and week tenors do not occur in
/// the input tables of this tool.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub struct Tenor {
    months: u32,
}

impl Tenor {
    /// The longest tenor accepted (the tables allow up to `30Y`; 50Y leaves room for long bonds).
    pub const MAX_MONTHS: u32 = 600;

    pub fn from_months(months: u32) -> Option<Tenor> {
        (1..=Self::MAX_MONTHS).contains(&months).then_some(Tenor { months })
    }

    pub fn months(self) -> u32 {
        self.months
    }

    /// Year fraction in the tenor's own terms (months / 12), used for guesses and labels only.
    pub fn years(self) -> f64 {
        self.months as f64 / 12.0
    }
}

/// Why a tenor string was not understood.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("tenor {text:?} is not understood: expected a whole number followed by M or Y, such as 6M, 1Y or 30Y")]
pub struct TenorError {
    pub text: String,
}

impl FromStr for Tenor {
    type Err = TenorError;

    fn from_str(s: &str) -> Result<Tenor, TenorError> {
        let err = || TenorError { text: s.to_string() };
        let t = s.trim();
        // ASCII only, so the split below falls on a character boundary (a two-byte character
        // such as `ʲ` used to panic here; found by the readers' fuzz harness).
        if t.len() < 2 || !t.is_ascii() {
            return Err(err());
        }
        let (num, unit) = t.split_at(t.len() - 1);
        if !num.bytes().all(|c| c.is_ascii_digit()) {
            return Err(err());
        }
        let n: u32 = num.parse().map_err(|_| err())?;
        let months = match unit {
            "M" | "m" => n,
            "Y" | "y" => n.checked_mul(12).ok_or_else(err)?,
            _ => return Err(err()),
        };
        Tenor::from_months(months).ok_or_else(err)
    }
}

impl fmt::Display for Tenor {
    /// Whole years print as `nY`, everything else as `nM`, so `12M` prints as `1Y`.
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if self.months % 12 == 0 {
            write!(f, "{}Y", self.months / 12)
        } else {
            write!(f, "{}M", self.months)
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_and_prints() {
        for (text, months, shown) in [
            ("6M", 6, "6M"),
            ("1Y", 12, "1Y"),
            ("12M", 12, "1Y"),
            ("30Y", 360, "30Y"),
            ("1M", 1, "1M"),
            ("11M", 11, "11M"),
        ] {
            let t: Tenor = text.parse().unwrap();
            assert_eq!(t.months(), months, "{text}");
            assert_eq!(t.to_string(), shown);
        }
    }

    #[test]
    fn rejects_nonsense() {
        for text in ["", "Y", "5", "5D", "-1Y", "0M", "1.5Y", "99999999999Y", "51Y", "\u{2b2}", "5\u{2b2}", "\u{e9}Y"] {
            assert!(text.parse::<Tenor>().is_err(), "{text}");
        }
    }
}
