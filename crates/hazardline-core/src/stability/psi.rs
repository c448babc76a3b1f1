//! Population stability index (PSI) of a cross-sectional distribution between two periods:
//! PSI = sum over buckets of (a_i - e_i) ln(a_i / e_i), with e_i the earlier ("expected")
//! share and a_i the later ("actual") share of entities in bucket i. Thresholds 0.10 and 0.25
//! are common practice, no single source.
//!
//! Empty buckets: a zero share (in either period) is replaced by a small epsilon (default
//! 1e-4, a setting) before its term is computed, and the shares are not renormalised. The rule
//! is applied the same way everywhere; it keeps every term finite while an emptied bucket still
//! contributes a large term, as it should.

use super::summary::{quantile_sorted, sorted};
use super::StabilityError;

/// Where the PSI bucket edges come from.
#[derive(Debug, Clone, PartialEq)]
pub enum PsiEdges {
    /// Interior edges from the earlier period's deciles (10%, ..., 90%, definition-7
    /// quantiles); tied edges are merged, so fewer than ten buckets can result.
    EarlierDeciles,
    /// Fixed interior edges, strictly increasing; k edges give k + 1 buckets.
    Given(Vec<f64>),
}

impl PsiEdges {
    /// Text for method notes.
    pub fn describe(&self) -> String {
        match self {
            PsiEdges::EarlierDeciles => "deciles of the earlier period".to_string(),
            PsiEdges::Given(e) => format!("given {e:?}"),
        }
    }

    /// Checks that given edges are finite and strictly increasing.
    pub fn check(&self) -> Result<(), StabilityError> {
        if let PsiEdges::Given(e) = self {
            let ordered = e.windows(2).all(|w| w[0] < w[1]);
            if e.is_empty() || !ordered || e.iter().any(|v| !v.is_finite()) {
                return Err(StabilityError::Setting {
                    name: "psi_edges".into(),
                    value: format!("{e:?}"),
                    expected: "at least one finite edge, strictly increasing",
                });
            }
        }
        Ok(())
    }

    /// The interior edges for an earlier sample `expected`.
    pub fn resolve(&self, expected: &[f64]) -> Vec<f64> {
        match self {
            PsiEdges::Given(e) => e.clone(),
            PsiEdges::EarlierDeciles => decile_edges(expected),
        }
    }
}

/// Interior decile edges of `values` with ties merged (strictly increasing output).
pub fn decile_edges(values: &[f64]) -> Vec<f64> {
    let s = sorted(values);
    let mut edges: Vec<f64> = (1..10).filter_map(|i| quantile_sorted(&s, i as f64 / 10.0)).collect();
    edges.dedup_by(|b, a| *b <= *a);
    edges
}

/// One bucket of a PSI computation.
#[derive(Debug, Clone, PartialEq)]
pub struct PsiBucket {
    /// Lower edge (exclusive); `-inf` for the first bucket.
    pub lower: f64,
    /// Upper edge (inclusive); `+inf` for the last bucket.
    pub upper: f64,
    /// Earlier-period count.
    pub expected_count: usize,
    /// Later-period count.
    pub actual_count: usize,
    /// Earlier-period share before the epsilon rule.
    pub expected_share: f64,
    /// Later-period share before the epsilon rule.
    pub actual_share: f64,
    /// (a - e) ln(a / e) after the epsilon rule.
    pub term: f64,
}

/// A PSI with its buckets.
#[derive(Debug, Clone, PartialEq)]
pub struct PsiResult {
    /// The index: the sum of the bucket terms.
    pub psi: f64,
    /// Buckets in ascending order of value.
    pub buckets: Vec<PsiBucket>,
}

/// Bucket index of `value` for interior `edges`: bucket i is (edge_{i-1}, edge_i].
fn bucket_of(edges: &[f64], value: f64) -> usize {
    edges.partition_point(|e| *e < value)
}

fn counts(edges: &[f64], values: &[f64]) -> Vec<usize> {
    let mut c = vec![0; edges.len() + 1];
    for v in values {
        c[bucket_of(edges, *v)] += 1;
    }
    c
}

/// PSI of `actual` (later) against `expected` (earlier) on interior `edges`, with the epsilon
/// rule of the module doc. Errors when either sample is empty, a value or edge is not finite,
/// or the edges are not strictly increasing.
pub fn psi(expected: &[f64], actual: &[f64], edges: &[f64], epsilon: f64) -> Result<PsiResult, StabilityError> {
    if !edges.is_empty() {
        PsiEdges::Given(edges.to_vec()).check()?;
    }
    if expected.is_empty() || actual.is_empty() {
        return Err(StabilityError::EmptySample { what: "PSI sample" });
    }
    if expected.iter().chain(actual).any(|v| !v.is_finite()) {
        return Err(StabilityError::NonFinite { what: "PSI sample" });
    }
    let (ce, ca) = (counts(edges, expected), counts(edges, actual));
    let (ne, na) = (expected.len() as f64, actual.len() as f64);
    let buckets: Vec<PsiBucket> = (0..=edges.len())
        .map(|i| {
            let (e, a) = (ce[i] as f64 / ne, ca[i] as f64 / na);
            let (ef, af) = (if e == 0.0 { epsilon } else { e }, if a == 0.0 { epsilon } else { a });
            PsiBucket {
                lower: if i == 0 { f64::NEG_INFINITY } else { edges[i - 1] },
                upper: edges.get(i).copied().unwrap_or(f64::INFINITY),
                expected_count: ce[i],
                actual_count: ca[i],
                expected_share: e,
                actual_share: a,
                term: (af - ef) * (af / ef).ln(),
            }
        })
        .collect();
    Ok(PsiResult { psi: buckets.iter().map(|b| b.term).sum(), buckets })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn values(groups: &[(f64, usize)]) -> Vec<f64> {
        groups.iter().flat_map(|&(v, n)| std::iter::repeat_n(v, n)).collect()
    }

    #[test]
    fn hand_worked_psi() {
        // Edges 0.01, 0.02, 0.05 give buckets (-inf, 0.01], (0.01, 0.02], (0.02, 0.05], (0.05, inf).
        // Earlier: 4, 3, 2, 1 of 10 entities -> e = 0.4, 0.3, 0.2, 0.1.
        // Later:   2, 3, 3, 2 of 10 entities -> a = 0.2, 0.3, 0.3, 0.2.
        // Terms (a - e) ln(a / e):
        //   (0.2 - 0.4) ln(0.5) = -0.2 x -0.693147 = 0.138629
        //   (0.3 - 0.3) ln(1.0) = 0
        //   (0.3 - 0.2) ln(1.5) =  0.1 x  0.405465 = 0.040547
        //   (0.2 - 0.1) ln(2.0) =  0.1 x  0.693147 = 0.069315
        // Sum = 0.248491 (amber: over 0.10, not over 0.25). A value on an edge (0.01) falls in
        // the bucket below it.
        let earlier = values(&[(0.005, 3), (0.01, 1), (0.015, 3), (0.03, 2), (0.08, 1)]);
        let later = values(&[(0.004, 2), (0.02, 3), (0.04, 3), (0.06, 2)]);
        let r = psi(&earlier, &later, &[0.01, 0.02, 0.05], 1e-4).unwrap();
        let terms: Vec<f64> = r.buckets.iter().map(|b| b.term).collect();
        let want = [0.2 * 2f64.ln(), 0.0, 0.1 * 1.5f64.ln(), 0.1 * 2f64.ln()];
        for (t, w) in terms.iter().zip(want) {
            assert!((t - w).abs() < 1e-12, "{terms:?}");
        }
        assert!((r.psi - 0.248491).abs() < 1e-6, "{}", r.psi);
    }

    #[test]
    fn empty_buckets_take_epsilon() {
        // Earlier e = 0.4, 0.3, 0.2, 0.1 as above; later all ten in the first two buckets,
        // 5 and 5: a = 0.5, 0.5, 0, 0 -> the zeros become 1e-4.
        //   (0.5 - 0.4) ln(1.25)          = 0.1 x 0.223144     = 0.022314
        //   (0.5 - 0.3) ln(5/3)           = 0.2 x 0.510826     = 0.102165
        //   (1e-4 - 0.2) ln(1e-4 / 0.2)   = -0.1999 x -7.600902 = 1.519420
        //   (1e-4 - 0.1) ln(1e-4 / 0.1)   = -0.0999 x -6.907755 = 0.690085
        // Sum = 2.333985.
        let earlier = values(&[(0.005, 4), (0.015, 3), (0.03, 2), (0.08, 1)]);
        let later = values(&[(0.005, 5), (0.015, 5)]);
        let r = psi(&earlier, &later, &[0.01, 0.02, 0.05], 1e-4).unwrap();
        assert!((r.psi - 2.333985).abs() < 1e-5, "{}", r.psi);
        assert_eq!(r.buckets[3].actual_share, 0.0);
    }

    #[test]
    fn identical_samples_and_bad_input() {
        let v: Vec<f64> = (1..=50).map(|i| i as f64 / 1000.0).collect();
        let edges = decile_edges(&v);
        assert_eq!(edges.len(), 9);
        let r = psi(&v, &v, &edges, 1e-4).unwrap();
        assert!(r.psi.abs() < 1e-15);
        assert!(psi(&[], &v, &edges, 1e-4).is_err());
        assert!(psi(&[f64::NAN], &v, &edges, 1e-4).is_err());
        assert!(psi(&v, &v, &[0.2, 0.1], 1e-4).is_err());
        // Ties merge edges: a sample of one value has a single edge.
        assert_eq!(decile_edges(&[0.01; 20]), vec![0.01]);
    }
}
