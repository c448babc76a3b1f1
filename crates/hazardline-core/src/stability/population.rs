//! PSI of each implied-PD series' cross-section (one mean per entity and period) between each
//! period and the one just before it, and between each period and the review's first period (a
//! fixed reference, so that a slow drift, small from one period to the next, is seen too).

use super::metrics::Scope;
use super::period::Period;
use super::psi::{psi, PsiBucket};
use super::settings::StabilitySettings;
use std::collections::BTreeMap;

/// One PSI between two consecutive periods of one series.
#[derive(Debug, Clone, PartialEq)]
pub struct PsiRow {
    /// Series name.
    pub series: String,
    /// The later period's label.
    pub period: String,
    /// The earlier period's label: the previous period, or the review's first period for the
    /// fixed-reference rows.
    pub previous_period: String,
    /// Entities in the earlier period.
    pub n_previous: usize,
    /// Entities in the later period.
    pub n_current: usize,
    /// The index; `None` when either period has fewer than `psi_min_entities` entities.
    pub psi: Option<f64>,
    /// The buckets (empty when `psi` is `None`).
    pub buckets: Vec<PsiBucket>,
}

/// PSI rows of every `psi_series` for every period whose previous period has data.
pub(crate) fn psi_rows(
    means: &BTreeMap<(String, Period, Scope, String), Vec<f64>>,
    settings: &StabilitySettings,
) -> Vec<PsiRow> {
    let mut out = Vec::new();
    for ((series, period, scope, _), current) in means {
        if *scope != Scope::Universe || !settings.psi_series.contains(series) {
            continue;
        }
        let prev = period.previous();
        // The review's first period of this series: the fixed reference.
        let first = means.keys().filter(|k| &k.0 == series && k.2 == Scope::Universe).map(|k| k.1).min();
        let mut references = vec![prev];
        if let Some(f) = first.filter(|f| *f != prev && f < period) {
            references.push(f);
        }
        for reference in references {
            let Some(earlier) = means.get(&(series.clone(), reference, Scope::Universe, "all".to_string())) else {
                continue;
            };
            let enough = earlier.len() >= settings.psi_min_entities && current.len() >= settings.psi_min_entities;
            let edges = settings.psi_edges.resolve(earlier);
            let result = if enough { psi(earlier, current, &edges, settings.psi_epsilon).ok() } else { None };
            out.push(PsiRow {
                series: series.clone(),
                period: period.label(),
                previous_period: reference.label(),
                n_previous: earlier.len(),
                n_current: current.len(),
                psi: result.as_ref().map(|r| r.psi),
                buckets: result.map(|r| r.buckets).unwrap_or_default(),
            });
        }
    }
    out
}
