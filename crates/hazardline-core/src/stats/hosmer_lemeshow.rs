//! Hosmer-Lemeshow test over buckets with given (not fitted) forecasts.
//!
//! HL = sum_i (d_i - n_i p_i)^2 / (n_i p_i (1 - p_i)), chi-square with k degrees of freedom for
//! k buckets because no parameter was estimated from these outcomes (Hosmer and Lemeshow 1980,
//! Communications in Statistics; the k-dof form for given forecasts as in Basel Committee
//! working paper 14, 2005). The p-value is the chi-square upper tail computed directly.

use super::special::chi_square_upper_tail;
use super::{check_counts, check_probability, StatsError};

/// One bucket: n obligors, d defaults, forecast PD p.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BucketForecast {
    pub n: u64,
    pub d: u64,
    pub p: f64,
}

/// The statistic, its degrees of freedom and the upper-tail p-value.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct HosmerLemeshow {
    pub statistic: f64,
    pub dof: usize,
    pub p_value: f64,
}

/// Hosmer-Lemeshow over `buckets`; every forecast must lie strictly inside (0, 1).
pub fn hosmer_lemeshow(buckets: &[BucketForecast]) -> Result<HosmerLemeshow, StatsError> {
    if buckets.is_empty() {
        return Err(StatsError::NoBuckets);
    }
    let mut statistic = 0.0;
    for (index, b) in buckets.iter().enumerate() {
        check_counts(b.d, b.n)
            .and_then(|_| check_probability("forecast", b.p))
            .map_err(|e| StatsError::Bucket { index, source: Box::new(e) })?;
        if b.p == 0.0 || b.p == 1.0 {
            return Err(StatsError::DegenerateForecast { index, p: b.p });
        }
        let (n, d) = (b.n as f64, b.d as f64);
        let expected = n * b.p;
        statistic += (d - expected).powi(2) / (expected * (1.0 - b.p));
    }
    let dof = buckets.len();
    let p_value = chi_square_upper_tail(statistic, dof as f64)?;
    Ok(HosmerLemeshow { statistic, dof, p_value })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// One bucket with 2 defaults where 1 was expected (n = 100, p = 0.01):
    /// (2 - 1)^2 / (1 x 0.99), chi-square 1 dof.
    #[test]
    fn one_bucket_by_hand() {
        let hl = hosmer_lemeshow(&[BucketForecast { n: 100, d: 2, p: 0.01 }]).unwrap();
        assert!((hl.statistic - 1.0 / 0.99).abs() < 1e-14);
        assert_eq!(hl.dof, 1);
        assert!(hl.p_value > 0.3 && hl.p_value < 0.33, "{}", hl.p_value);
    }

    #[test]
    fn invalid_buckets_are_errors() {
        assert_eq!(hosmer_lemeshow(&[]), Err(StatsError::NoBuckets));
        assert_eq!(
            hosmer_lemeshow(&[BucketForecast { n: 10, d: 0, p: 0.0 }]),
            Err(StatsError::DegenerateForecast { index: 0, p: 0.0 })
        );
        assert!(matches!(
            hosmer_lemeshow(&[BucketForecast { n: 10, d: 1, p: 0.1 }, BucketForecast { n: 0, d: 0, p: 0.1 }]),
            Err(StatsError::Bucket { index: 1, .. })
        ));
        assert!(hosmer_lemeshow(&[BucketForecast { n: 10, d: 1, p: f64::NAN }]).is_err());
    }
}
