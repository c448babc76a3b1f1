//! Discriminatory power: the area under the ROC curve (AUC) with the variance of DeLong,
//! DeLong and Clarke-Pearson (1988, "Comparing the areas under two or more correlated receiver
//! operating characteristic curves: a nonparametric approach", Biometrics 44, 837-845), and
//! their paired test of two scores on the same obligors.
//!
//! A higher score means a higher risk (an implied PD, or a grade where 1 is best). With m
//! defaulters x_i and n survivors y_j, psi(x, y) = 1 if x > y, 1/2 if x = y, 0 otherwise;
//! AUC = mean of psi over all pairs (ties count one half, as scikit-learn's `roc_auc_score`
//! counts them). The structural components are V10(x_i) = mean_j psi(x_i, y_j) and
//! V01(y_j) = mean_i psi(x_i, y_j); Var(AUC) = S10 / m + S01 / n with S10, S01 their sample
//! variances (divisor m - 1 and n - 1). The components are counted by binary search in the
//! sorted other class, O((m + n) log(m + n)).

use super::{special, Interval, StatsError};

/// AUC of one score with its DeLong variance.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Auc {
    pub auc: f64,
    /// DeLong variance; 0 when every pair is ordered the same way.
    pub variance: f64,
    pub defaults: u64,
    pub survivors: u64,
}

impl Auc {
    pub fn se(&self) -> f64 {
        self.variance.max(0.0).sqrt()
    }
    /// Gini coefficient (accuracy ratio), 2 AUC - 1.
    pub fn gini(&self) -> f64 {
        2.0 * self.auc - 1.0
    }
    /// The normal interval auc -/+ z se at the two-sided `level`, clipped to [0, 1].
    pub fn interval(&self, level: f64) -> Result<Interval, StatsError> {
        let z = special::normal_quantile(1.0 - super::half_alpha(level)?)?;
        let h = z * self.se();
        Ok(Interval { lo: (self.auc - h).max(0.0), hi: (self.auc + h).min(1.0) })
    }
}

/// The paired DeLong test of two scores on the same obligors.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PairedAuc {
    pub a: Auc,
    pub b: Auc,
    pub covariance: f64,
    /// (AUC_a - AUC_b) / sd of the difference; None when that sd is 0.
    pub z: Option<f64>,
    /// Two-sided normal p-value of z.
    pub p_value: Option<f64>,
}

/// psi summed against a sorted slice: the number of values below x plus half the ties.
fn half_rank(sorted: &[f64], x: f64) -> f64 {
    let below = sorted.partition_point(|v| *v < x);
    let not_above = sorted.partition_point(|v| *v <= x);
    below as f64 + 0.5 * (not_above - below) as f64
}

/// Structural components (V10 over defaulters, V01 over survivors) of one score.
fn components(scores: &[f64], defaulted: &[bool]) -> Result<(Vec<f64>, Vec<f64>), StatsError> {
    if scores.len() != defaulted.len() {
        return Err(StatsError::LengthMismatch { what: "scores and outcomes", a: scores.len(), b: defaulted.len() });
    }
    if let Some(&s) = scores.iter().find(|s| !s.is_finite()) {
        return Err(StatsError::BadValue { name: "score", value: s });
    }
    let mut pos: Vec<f64> = scores.iter().zip(defaulted).filter(|(_, d)| **d).map(|(s, _)| *s).collect();
    let mut neg: Vec<f64> = scores.iter().zip(defaulted).filter(|(_, d)| !**d).map(|(s, _)| *s).collect();
    if pos.is_empty() || neg.is_empty() {
        return Err(StatsError::OneClass { defaults: pos.len() as u64, survivors: neg.len() as u64 });
    }
    pos.sort_by(f64::total_cmp);
    neg.sort_by(f64::total_cmp);
    let (m, n) = (pos.len() as f64, neg.len() as f64);
    let v10 = pos.iter().map(|x| half_rank(&neg, *x) / n).collect();
    // psi(x, y) for fixed y: defaulters above y plus half the ties = m - half_rank(pos, y).
    let v01 = neg.iter().map(|y| (m - half_rank(&pos, *y)) / m).collect();
    Ok((v10, v01))
}

fn mean(v: &[f64]) -> f64 {
    v.iter().sum::<f64>() / v.len() as f64
}

/// Sample covariance (divisor len - 1; 0 for a single value).
fn cov(a: &[f64], b: &[f64]) -> f64 {
    if a.len() < 2 {
        return 0.0;
    }
    let (ma, mb) = (mean(a), mean(b));
    a.iter().zip(b).map(|(x, y)| (x - ma) * (y - mb)).sum::<f64>() / (a.len() - 1) as f64
}

fn auc_of(v10: &[f64], v01: &[f64]) -> Auc {
    let (m, n) = (v10.len() as f64, v01.len() as f64);
    Auc {
        auc: mean(v10),
        variance: cov(v10, v10) / m + cov(v01, v01) / n,
        defaults: v10.len() as u64,
        survivors: v01.len() as u64,
    }
}

/// AUC and DeLong variance of `scores` (higher = riskier) against `defaulted`. Needs at least
/// one defaulter and one survivor.
pub fn auc_delong(scores: &[f64], defaulted: &[bool]) -> Result<Auc, StatsError> {
    let (v10, v01) = components(scores, defaulted)?;
    Ok(auc_of(&v10, &v01))
}

/// The paired DeLong test of `a` against `b` on the same obligors. The components of each
/// score are in the order of the sorted scores, so they are recomputed here per obligor.
pub fn auc_paired(a: &[f64], b: &[f64], defaulted: &[bool]) -> Result<PairedAuc, StatsError> {
    if a.len() != b.len() {
        return Err(StatsError::LengthMismatch { what: "the two scores", a: a.len(), b: b.len() });
    }
    let per_obligor = |s: &[f64]| -> Result<(Vec<f64>, Vec<f64>), StatsError> {
        components(s, defaulted)?;
        let mut pos: Vec<f64> = s.iter().zip(defaulted).filter(|(_, d)| **d).map(|(x, _)| *x).collect();
        let mut neg: Vec<f64> = s.iter().zip(defaulted).filter(|(_, d)| !**d).map(|(x, _)| *x).collect();
        pos.sort_by(f64::total_cmp);
        neg.sort_by(f64::total_cmp);
        let (m, n) = (pos.len() as f64, neg.len() as f64);
        let v10 = s.iter().zip(defaulted).filter(|(_, d)| **d).map(|(x, _)| half_rank(&neg, *x) / n).collect();
        let v01 = s.iter().zip(defaulted).filter(|(_, d)| !**d).map(|(y, _)| (m - half_rank(&pos, *y)) / m).collect();
        Ok((v10, v01))
    };
    let (a10, a01) = per_obligor(a)?;
    let (b10, b01) = per_obligor(b)?;
    let (m, n) = (a10.len() as f64, a01.len() as f64);
    let (ra, rb) = (auc_of(&a10, &a01), auc_of(&b10, &b01));
    let covariance = cov(&a10, &b10) / m + cov(&a01, &b01) / n;
    let var = ra.variance + rb.variance - 2.0 * covariance;
    let (z, p_value) = if var > 0.0 {
        let z = (ra.auc - rb.auc) / var.sqrt();
        (Some(z), Some(2.0 * special::normal_upper_tail(z.abs())))
    } else {
        (None, None)
    };
    Ok(PairedAuc { a: ra, b: rb, covariance, z, p_value })
}

/// The one-sided p-value of "no power" (AUC <= 1/2) from the Mann-Whitney statistic's
/// variance under that hypothesis, with the usual correction for ties:
/// var(AUC) = [(N + 1) - sum(t^3 - t) / (N (N - 1))] / (12 m n) over the tie groups t of all
/// N = m + n scores, normal approximation without continuity correction (as
/// `scipy.stats.mannwhitneyu(method="asymptotic", use_continuity=False)`). Unlike a z on the
/// DeLong standard error, which is estimated under the alternative, it cannot fall below what
/// the ranks allow when the defaulters are few. None when every score is tied.
pub fn auc_no_power_p(scores: &[f64], defaulted: &[bool]) -> Result<Option<f64>, StatsError> {
    let a = auc_delong(scores, defaulted)?;
    let (m, n) = (a.defaults as f64, a.survivors as f64);
    let total = m + n;
    let mut sorted: Vec<f64> = scores.to_vec();
    sorted.sort_by(f64::total_cmp);
    let mut ties = 0.0;
    let mut i = 0;
    while i < sorted.len() {
        let j = i + sorted[i..].partition_point(|v| *v == sorted[i]);
        let t = (j - i) as f64;
        ties += t * t * t - t;
        i = j;
    }
    let var = ((total + 1.0) - ties / (total * (total - 1.0))) / (12.0 * m * n);
    Ok((var > 0.0).then(|| special::normal_upper_tail((a.auc - 0.5) / var.sqrt())))
}

/// Two AUCs from independent samples (this review's and a reference review's): z = (a - b) /
/// sqrt(se_a^2 + se_b^2) and its two-sided normal p-value; None without a positive variance.
/// Where the two samples share obligors the test is approximate (their covariance is ignored).
pub fn auc_difference_independent(a: f64, se_a: f64, b: f64, se_b: f64) -> Option<(f64, f64)> {
    let var = se_a * se_a + se_b * se_b;
    (var > 0.0 && var.is_finite()).then(|| {
        let z = (a - b) / var.sqrt();
        (z, 2.0 * special::normal_upper_tail(z.abs()))
    })
}

/// The ROC and CAP curves of a score, as polylines from (0, 0) to (1, 1). Members are taken
/// riskiest first (highest score); a group of tied scores is one straight step, so the area
/// under the ROC polyline is the AUC with ties counted one half.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct RankingCurves {
    /// (share of survivors above the cut, share of defaulters above it).
    pub roc: Vec<(f64, f64)>,
    /// (share of all members above the cut, share of defaulters above it).
    pub cap: Vec<(f64, f64)>,
    /// The CAP of a perfect ranking: every defaulter first.
    pub cap_perfect: Vec<(f64, f64)>,
}

/// [`RankingCurves`] of `scores` (higher = riskier) against `defaulted`; needs both classes.
pub fn ranking_curves(scores: &[f64], defaulted: &[bool]) -> Result<RankingCurves, StatsError> {
    components(scores, defaulted)?;
    let mut order: Vec<(f64, bool)> = scores.iter().copied().zip(defaulted.iter().copied()).collect();
    order.sort_by(|a, b| b.0.total_cmp(&a.0));
    let total = order.len() as f64;
    let m = order.iter().filter(|x| x.1).count() as f64;
    let n = total - m;
    let mut out = RankingCurves { roc: vec![(0.0, 0.0)], cap: vec![(0.0, 0.0)], cap_perfect: Vec::new() };
    let (mut pos, mut neg) = (0usize, 0usize);
    let mut i = 0;
    while i < order.len() {
        let j = i + order[i..].partition_point(|x| x.0 == order[i].0);
        pos += order[i..j].iter().filter(|x| x.1).count();
        neg += order[i..j].iter().filter(|x| !x.1).count();
        out.roc.push((neg as f64 / n, pos as f64 / m));
        out.cap.push(((pos + neg) as f64 / total, pos as f64 / m));
        i = j;
    }
    out.cap_perfect = vec![(0.0, 0.0), (m / total, 1.0), (1.0, 1.0)];
    Ok(out)
}

/// Area under a polyline by the trapezoid rule.
pub fn area_under(points: &[(f64, f64)]) -> f64 {
    points.windows(2).map(|w| (w[1].0 - w[0].0) * (w[0].1 + w[1].1) / 2.0).sum()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The area under the ROC polyline is the AUC; the CAP's accuracy ratio (its area above
    /// the diagonal over the perfect ranking's) is the Gini coefficient 2 AUC - 1, an identity
    /// of the two curves (common practice, no source).
    #[test]
    fn ranking_curves_agree_with_the_auc() {
        let s = [0.9, 0.5, 0.5, 0.2, 0.1, 0.5, 0.05, 0.3];
        let d = [true, true, false, false, false, true, false, false];
        let a = auc_delong(&s, &d).unwrap();
        let c = ranking_curves(&s, &d).unwrap();
        assert!((area_under(&c.roc) - a.auc).abs() < 1e-15);
        let ar = (area_under(&c.cap) - 0.5) / (area_under(&c.cap_perfect) - 0.5);
        assert!((ar - a.gini()).abs() < 1e-14, "{ar} vs {}", a.gini());
        assert_eq!(c.roc.last(), Some(&(1.0, 1.0)));
        assert_eq!(c.cap.len(), 7, "origin plus six distinct scores");
    }

    /// A hand example: defaulters 0.9, 0.5; survivors 0.5, 0.2, 0.1. Pairs: (0.9 beats all
    /// three) + (0.5 ties one, beats two) = 3 + 2.5 = 5.5 of 6.
    #[test]
    fn hand_example_with_a_tie() {
        let s = [0.9, 0.5, 0.5, 0.2, 0.1];
        let d = [true, true, false, false, false];
        let a = auc_delong(&s, &d).unwrap();
        assert!((a.auc - 5.5 / 6.0).abs() < 1e-15);
        // V10 = (1, 5/6); V01 = (3/4, 1, 1): S10 = (1/12)^2 * 2 / 1, S01 = var(3/4, 1, 1).
        let s10 = 2.0 * (1.0f64 / 12.0).powi(2);
        let m01: f64 = (0.75 + 2.0) / 3.0;
        let s01 = ((0.75 - m01).powi(2) + 2.0 * (1.0 - m01).powi(2)) / 2.0;
        assert!((a.variance - (s10 / 2.0 + s01 / 3.0)).abs() < 1e-15);
        assert!((a.gini() - (2.0 * 5.5 / 6.0 - 1.0)).abs() < 1e-15);
    }

    /// z = (0.8 - 0.7) / sqrt(0.03^2 + 0.04^2) = 2 exactly; p = 2 (1 - Phi(2)) = erfc(sqrt 2)
    /// = 0.04550026389635844 (Python's math.erfc; the normal tail here agrees to 1e-10).
    #[test]
    fn independent_difference() {
        let (z, p) = auc_difference_independent(0.8, 0.03, 0.7, 0.04).unwrap();
        assert!((z - 2.0).abs() < 1e-12);
        assert!((p - 0.045_500_263_896_358_44).abs() < 1e-10 * p, "{p}");
        assert_eq!(auc_difference_independent(0.8, 0.0, 0.7, 0.0), None);
    }

    /// Two defaulters ranked riskiest of 235 members: the p of no power cannot be near the
    /// DeLong-based 1e-7; the Mann-Whitney null variance gives z = 0.5 / sqrt(236 / (12 * 2 *
    /// 233)) without ties.
    #[test]
    fn no_power_p_uses_the_null_variance() {
        let mut s: Vec<f64> = (0..233).map(|k| f64::from(k) / 1000.0).collect();
        s.extend([0.9, 0.95]);
        let d: Vec<bool> = (0..235).map(|k| k >= 233).collect();
        let p = auc_no_power_p(&s, &d).unwrap().unwrap();
        let z = 0.5 / (236.0f64 / (12.0 * 2.0 * 233.0)).sqrt();
        assert!((p - special::normal_upper_tail(z)).abs() < 1e-15, "{p}");
        assert!(p > 1e-5);
        assert_eq!(auc_no_power_p(&[0.1, 0.1, 0.1], &[true, false, false]).unwrap(), None);
    }

    #[test]
    fn one_class_is_an_error() {
        assert!(matches!(auc_delong(&[0.1, 0.2], &[false, false]), Err(StatsError::OneClass { .. })));
        assert!(auc_delong(&[0.1, f64::NAN], &[true, false]).is_err());
    }

    #[test]
    fn a_score_against_itself() {
        let s = [0.3, 0.1, 0.2, 0.05, 0.4];
        let d = [true, false, true, false, false];
        let p = auc_paired(&s, &s, &d).unwrap();
        assert_eq!(p.a, p.b);
        assert_eq!(p.z, None, "the difference has no variance");
    }
}
