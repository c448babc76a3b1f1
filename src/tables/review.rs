//! The stability review's tables: `stability` (per period, series and scope), `stability_bands`
//! (cross-sectional quantiles per date), `stability_psi`, `stability_breaks` (CUSUM tests),
//! and the residual review's `residual_curves`, `residual_tenors`, `residual_worst` and
//! `residual_repricing`.

use super::parquet::TableBuilder;
use super::readback::{bools, dates, floats, intern, ints, strs, text_form};
use super::{col, Column, Kind::*, Table};
use crate::error::Result;
use crate::stability::residual_review::{CurveResidualRow, RepricingShare, TenorResidualRow, WorstResidualRow};
use crate::stability::{BreakRow, CrossSectionRow, PsiRow, ResidualObservation, StabilityRow};
use polars::prelude::DataFrame;
use std::path::Path;
use std::sync::Arc;

fn count(v: Option<i64>) -> usize {
    v.unwrap_or(0).max(0) as usize
}

impl Table for StabilityRow {
    const NAME: &'static str = "stability";
    const COLUMNS: &'static [Column] = &[
        col("period", Text),
        col("series", Text),
        col("scope", Text),
        col("key", Text),
        col("n", Int),
        col("mean", Float),
        col("sd", Float),
        col("cv", Float),
        col("median", Float),
        col("p10", Float),
        col("p90", Float),
        col("moves", Int),
        col("max_abs_move", Float),
        col("max_move_date", Date),
        col("large_move_share", Float),
        col("param_rel_move", Float),
        col("market_rel_move", Float),
        col("move_ratio", Float),
        col("failures", Int),
        col("infeasible", Int),
        col("mean_change", Float),
        col("median_change", Float),
    ];

    fn frame(rows: &[Self]) -> Result<DataFrame> {
        let u = |v: Option<usize>| v.map(|x| x as i64);
        TableBuilder::new()
            .strings("period", rows.iter().map(|r| Some(&r.period)))
            .strings("series", rows.iter().map(|r| Some(&r.series)))
            .strings("scope", rows.iter().map(|r| Some(r.scope.as_str())))
            .strings("key", rows.iter().map(|r| Some(&r.key)))
            .ints("n", rows.iter().map(|r| Some(r.n as i64)))
            .floats("mean", rows.iter().map(|r| r.mean))
            .floats("sd", rows.iter().map(|r| r.sd))
            .floats("cv", rows.iter().map(|r| r.cv))
            .floats("median", rows.iter().map(|r| r.median))
            .floats("p10", rows.iter().map(|r| r.p10))
            .floats("p90", rows.iter().map(|r| r.p90))
            .ints("moves", rows.iter().map(|r| u(r.moves)))
            .floats("max_abs_move", rows.iter().map(|r| r.max_abs_move))
            .dates("max_move_date", rows.iter().map(|r| r.max_move_date))
            .floats("large_move_share", rows.iter().map(|r| r.large_move_share))
            .floats("param_rel_move", rows.iter().map(|r| r.param_rel_move))
            .floats("market_rel_move", rows.iter().map(|r| r.market_rel_move))
            .floats("move_ratio", rows.iter().map(|r| r.move_ratio))
            .ints("failures", rows.iter().map(|r| r.failures.map(|x| x as i64)))
            .ints("infeasible", rows.iter().map(|r| r.infeasible.map(|x| x as i64)))
            .floats("mean_change", rows.iter().map(|r| r.mean_change))
            .floats("median_change", rows.iter().map(|r| r.median_change))
            .finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let f = |name: &str| floats(df, path, name);
        let (mut pe, mut se, sc, mut k, n) = (
            strs(df, path, "period")?,
            strs(df, path, "series")?,
            strs(df, path, "scope")?,
            strs(df, path, "key")?,
            ints(df, path, "n")?,
        );
        let (mean, sd, cv, med, p10, p90, mv, mam, mmd) = (
            f("mean")?,
            f("sd")?,
            f("cv")?,
            f("median")?,
            f("p10")?,
            f("p90")?,
            ints(df, path, "moves")?,
            f("max_abs_move")?,
            dates(df, path, "max_move_date")?,
        );
        let (lms, prm, mrm, mr, fa, inf, mc, mdc) = (
            f("large_move_share")?,
            f("param_rel_move")?,
            f("market_rel_move")?,
            f("move_ratio")?,
            ints(df, path, "failures")?,
            ints(df, path, "infeasible")?,
            f("mean_change")?,
            f("median_change")?,
        );
        (0..df.height())
            .map(|i| {
                Ok(StabilityRow {
                    period: pe[i].take().unwrap_or_default(),
                    series: se[i].take().unwrap_or_default(),
                    scope: text_form(sc[i].as_deref(), "scope", path, i)?,
                    key: k[i].take().unwrap_or_default(),
                    n: count(n[i]),
                    mean: mean[i],
                    sd: sd[i],
                    cv: cv[i],
                    median: med[i],
                    p10: p10[i],
                    p90: p90[i],
                    moves: mv[i].map(|x| x.max(0) as usize),
                    max_abs_move: mam[i],
                    max_move_date: mmd[i],
                    large_move_share: lms[i],
                    param_rel_move: prm[i],
                    market_rel_move: mrm[i],
                    move_ratio: mr[i],
                    failures: fa[i].map(|x| x.max(0) as u64),
                    infeasible: inf[i].map(|x| x.max(0) as u64),
                    mean_change: mc[i],
                    median_change: mdc[i],
                })
            })
            .collect()
    }
}

impl Table for CrossSectionRow {
    const NAME: &'static str = "stability_bands";
    const COLUMNS: &'static [Column] = &[
        col("date", Date),
        col("period", Text),
        col("series", Text),
        col("scope", Text),
        col("key", Text),
        col("n", Int),
        col("p10", Float),
        col("p50", Float),
        col("p90", Float),
    ];

    fn frame(b: &[Self]) -> Result<DataFrame> {
        TableBuilder::new()
            .dates("date", b.iter().map(|r| Some(r.date)))
            .strings("period", b.iter().map(|r| Some(&r.period)))
            .strings("series", b.iter().map(|r| Some(&r.series)))
            .strings("scope", b.iter().map(|r| Some(r.scope.as_str())))
            .strings("key", b.iter().map(|r| Some(&r.key)))
            .ints("n", b.iter().map(|r| Some(r.n as i64)))
            .floats("p10", b.iter().map(|r| Some(r.p10)))
            .floats("p50", b.iter().map(|r| Some(r.p50)))
            .floats("p90", b.iter().map(|r| Some(r.p90)))
            .finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let (d, mut pe, mut se, sc, mut k, n) = (
            dates(df, path, "date")?,
            strs(df, path, "period")?,
            strs(df, path, "series")?,
            strs(df, path, "scope")?,
            strs(df, path, "key")?,
            ints(df, path, "n")?,
        );
        let (p10, p50, p90) = (floats(df, path, "p10")?, floats(df, path, "p50")?, floats(df, path, "p90")?);
        (0..df.height())
            .map(|i| {
                Ok(CrossSectionRow {
                    date: d[i].unwrap_or_default(),
                    period: pe[i].take().unwrap_or_default(),
                    series: se[i].take().unwrap_or_default(),
                    scope: text_form(sc[i].as_deref(), "scope", path, i)?,
                    key: k[i].take().unwrap_or_default(),
                    n: count(n[i]),
                    p10: p10[i].unwrap_or(f64::NAN),
                    p50: p50[i].unwrap_or(f64::NAN),
                    p90: p90[i].unwrap_or(f64::NAN),
                })
            })
            .collect()
    }
}

/// A row of `stability_psi`: the population stability index of a series between two periods
/// (the bucket shares stay in the core's [`PsiRow`]; the table records how many buckets).
#[derive(Debug, Clone, PartialEq)]
pub struct PsiRecord {
    pub series: String,
    pub period: String,
    pub previous_period: String,
    pub n_previous: usize,
    pub n_current: usize,
    pub psi: Option<f64>,
    pub buckets: usize,
}

impl From<&PsiRow> for PsiRecord {
    fn from(r: &PsiRow) -> Self {
        PsiRecord {
            series: r.series.clone(),
            period: r.period.clone(),
            previous_period: r.previous_period.clone(),
            n_previous: r.n_previous,
            n_current: r.n_current,
            psi: r.psi,
            buckets: r.buckets.len(),
        }
    }
}

impl Table for PsiRecord {
    const NAME: &'static str = "stability_psi";
    const COLUMNS: &'static [Column] = &[
        col("series", Text),
        col("period", Text),
        col("previous_period", Text),
        col("n_previous", Int),
        col("n_current", Int),
        col("psi", Float),
        col("buckets", Int),
    ];

    fn frame(p: &[Self]) -> Result<DataFrame> {
        TableBuilder::new()
            .strings("series", p.iter().map(|r| Some(&r.series)))
            .strings("period", p.iter().map(|r| Some(&r.period)))
            .strings("previous_period", p.iter().map(|r| Some(&r.previous_period)))
            .ints("n_previous", p.iter().map(|r| Some(r.n_previous as i64)))
            .ints("n_current", p.iter().map(|r| Some(r.n_current as i64)))
            .floats("psi", p.iter().map(|r| r.psi))
            .ints("buckets", p.iter().map(|r| Some(r.buckets as i64)))
            .finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let (mut s, mut p, mut pp, np, nc, psi, b) = (
            strs(df, path, "series")?,
            strs(df, path, "period")?,
            strs(df, path, "previous_period")?,
            ints(df, path, "n_previous")?,
            ints(df, path, "n_current")?,
            floats(df, path, "psi")?,
            ints(df, path, "buckets")?,
        );
        Ok((0..df.height())
            .map(|i| PsiRecord {
                series: s[i].take().unwrap_or_default(),
                period: p[i].take().unwrap_or_default(),
                previous_period: pp[i].take().unwrap_or_default(),
                n_previous: count(np[i]),
                n_current: count(nc[i]),
                psi: psi[i],
                buckets: count(b[i]),
            })
            .collect())
    }
}

impl Table for BreakRow {
    const NAME: &'static str = "stability_breaks";
    const COLUMNS: &'static [Column] = &[
        col("entity", Text),
        col("series", Text),
        col("window", Text),
        col("target", Text),
        col("n", Int),
        col("status", Text),
        col("adf_t", Float),
        col("adf_critical", Float),
        col("changes_r1", Float),
        col("lags", Int),
        col("long_run_sd", Float),
        col("statistic", Float),
        col("p_value", Float),
        col("break_date", Date),
    ];

    fn metadata() -> Vec<(String, String)> {
        vec![(
            "hazardline.method".into(),
            "statistic = sup_k |sum_{t<=k} (y_t - mean y)| / (long_run_sd sqrt T) on the tested values y (levels, or daily changes where the augmented Dickey-Fuller t-statistic adf_t is not below adf_critical and the changes' lag-1 autocorrelation changes_r1 is above -0.25); long_run_sd: Newey-West with Bartlett weights and lags; p_value: Kolmogorov tail; break_date: the last value before the estimated break".into(),
        )]
    }

    fn frame(k: &[Self]) -> Result<DataFrame> {
        TableBuilder::new()
            .strings("entity", k.iter().map(|r| Some(&r.entity)))
            .strings("series", k.iter().map(|r| Some(&r.series)))
            .strings("window", k.iter().map(|r| Some(&r.window)))
            .strings("target", k.iter().map(|r| Some(r.target)))
            .ints("n", k.iter().map(|r| Some(r.n as i64)))
            .strings("status", k.iter().map(|r| Some(r.status.as_str())))
            .floats("adf_t", k.iter().map(|r| r.adf_t))
            .floats("adf_critical", k.iter().map(|r| r.adf_critical))
            .floats("changes_r1", k.iter().map(|r| r.changes_r1))
            .ints("lags", k.iter().map(|r| r.lags))
            .floats("long_run_sd", k.iter().map(|r| r.long_run_sd))
            .floats("statistic", k.iter().map(|r| r.statistic))
            .floats("p_value", k.iter().map(|r| r.p_value))
            .dates("break_date", k.iter().map(|r| r.break_date))
            .finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let (mut e, mut s, mut w, t, n, st) = (
            strs(df, path, "entity")?,
            strs(df, path, "series")?,
            strs(df, path, "window")?,
            strs(df, path, "target")?,
            ints(df, path, "n")?,
            strs(df, path, "status")?,
        );
        let (at, ac, r1, lg, lr, stat, pv, bd) = (
            floats(df, path, "adf_t")?,
            floats(df, path, "adf_critical")?,
            floats(df, path, "changes_r1")?,
            ints(df, path, "lags")?,
            floats(df, path, "long_run_sd")?,
            floats(df, path, "statistic")?,
            floats(df, path, "p_value")?,
            dates(df, path, "break_date")?,
        );
        (0..df.height())
            .map(|i| {
                let status = st[i].as_deref().unwrap_or("");
                Ok(BreakRow {
                    entity: e[i].take().unwrap_or_default(),
                    series: s[i].take().unwrap_or_default(),
                    window: w[i].take().unwrap_or_default(),
                    target: intern(t[i].as_deref().unwrap_or("")),
                    n: count(n[i]),
                    status: text_form(Some(status), "status", path, i)?,
                    adf_t: at[i],
                    adf_critical: ac[i],
                    changes_r1: r1[i],
                    lags: lg[i],
                    long_run_sd: lr[i],
                    statistic: stat[i],
                    p_value: pv[i],
                    break_date: bd[i],
                })
            })
            .collect()
    }
}

impl Table for CurveResidualRow {
    const NAME: &'static str = "residual_curves";
    const COLUMNS: &'static [Column] = &[
        col("date", Date),
        col("entity", Text),
        col("method", Text),
        col("n", Int),
        col("rmse_bp", Float),
        col("max_abs_bp", Float),
        col("worst_tenor", Text),
        col("converged", Bool),
        col("reprices", Bool),
    ];

    fn frame(c: &[Self]) -> Result<DataFrame> {
        TableBuilder::new()
            .dates("date", c.iter().map(|r| Some(r.date)))
            .strings("entity", c.iter().map(|r| Some(&r.entity)))
            .strings("method", c.iter().map(|r| Some(&r.method)))
            .ints("n", c.iter().map(|r| Some(r.n as i64)))
            .floats("rmse_bp", c.iter().map(|r| Some(r.rmse_bp)))
            .floats("max_abs_bp", c.iter().map(|r| Some(r.max_abs_bp)))
            .strings("worst_tenor", c.iter().map(|r| Some(&r.worst_tenor)))
            .bools("converged", c.iter().map(|r| Some(r.converged)))
            .bools("reprices", c.iter().map(|r| Some(r.reprices)))
            .finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let (d, e, m, n, rm, ma) = (
            dates(df, path, "date")?,
            strs(df, path, "entity")?,
            strs(df, path, "method")?,
            ints(df, path, "n")?,
            floats(df, path, "rmse_bp")?,
            floats(df, path, "max_abs_bp")?,
        );
        let (wt, cv, rp) =
            (strs(df, path, "worst_tenor")?, bools(df, path, "converged")?, bools(df, path, "reprices")?);
        let text = |v: &Option<String>| -> Arc<str> { Arc::from(v.as_deref().unwrap_or("")) };
        Ok((0..df.height())
            .map(|i| CurveResidualRow {
                date: d[i].unwrap_or_default(),
                entity: text(&e[i]),
                method: text(&m[i]),
                n: count(n[i]),
                rmse_bp: rm[i].unwrap_or(f64::NAN),
                max_abs_bp: ma[i].unwrap_or(f64::NAN),
                worst_tenor: text(&wt[i]),
                converged: cv[i].unwrap_or(false),
                reprices: rp[i].unwrap_or(false),
            })
            .collect())
    }
}

impl Table for TenorResidualRow {
    const NAME: &'static str = "residual_tenors";
    const COLUMNS: &'static [Column] = &[
        col("method", Text),
        col("tenor", Text),
        col("n", Int),
        col("q01", Float),
        col("q05", Float),
        col("q50", Float),
        col("q95", Float),
        col("q99", Float),
        col("abs_q01", Float),
        col("abs_q05", Float),
        col("abs_q50", Float),
        col("abs_q95", Float),
        col("abs_q99", Float),
    ];

    fn frame(t: &[Self]) -> Result<DataFrame> {
        TableBuilder::new()
            .strings("method", t.iter().map(|r| Some(&r.method)))
            .strings("tenor", t.iter().map(|r| Some(&r.tenor)))
            .ints("n", t.iter().map(|r| Some(r.n as i64)))
            .floats("q01", t.iter().map(|r| Some(r.q01)))
            .floats("q05", t.iter().map(|r| Some(r.q05)))
            .floats("q50", t.iter().map(|r| Some(r.q50)))
            .floats("q95", t.iter().map(|r| Some(r.q95)))
            .floats("q99", t.iter().map(|r| Some(r.q99)))
            .floats("abs_q01", t.iter().map(|r| Some(r.abs_q01)))
            .floats("abs_q05", t.iter().map(|r| Some(r.abs_q05)))
            .floats("abs_q50", t.iter().map(|r| Some(r.abs_q50)))
            .floats("abs_q95", t.iter().map(|r| Some(r.abs_q95)))
            .floats("abs_q99", t.iter().map(|r| Some(r.abs_q99)))
            .finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let q = |name: &str| -> Result<Vec<f64>> {
            Ok(floats(df, path, name)?.into_iter().map(|v| v.unwrap_or(f64::NAN)).collect())
        };
        let (mut m, mut t, n) = (strs(df, path, "method")?, strs(df, path, "tenor")?, ints(df, path, "n")?);
        let (q01, q05, q50, q95, q99) = (q("q01")?, q("q05")?, q("q50")?, q("q95")?, q("q99")?);
        let (a01, a05, a50, a95, a99) = (q("abs_q01")?, q("abs_q05")?, q("abs_q50")?, q("abs_q95")?, q("abs_q99")?);
        Ok((0..df.height())
            .map(|i| TenorResidualRow {
                method: m[i].take().unwrap_or_default(),
                tenor: t[i].take().unwrap_or_default(),
                n: count(n[i]),
                q01: q01[i],
                q05: q05[i],
                q50: q50[i],
                q95: q95[i],
                q99: q99[i],
                abs_q01: a01[i],
                abs_q05: a05[i],
                abs_q50: a50[i],
                abs_q95: a95[i],
                abs_q99: a99[i],
            })
            .collect())
    }
}

impl Table for WorstResidualRow {
    const NAME: &'static str = "residual_worst";
    const COLUMNS: &'static [Column] = &[
        col("rank", Int),
        col("date", Date),
        col("entity", Text),
        col("method", Text),
        col("instrument", Text),
        col("tenor_or_bond", Text),
        col("market", Float),
        col("model", Float),
        col("residual_bp", Float),
        col("converged", Bool),
    ];

    fn frame(w: &[Self]) -> Result<DataFrame> {
        TableBuilder::new()
            .ints("rank", w.iter().map(|r| Some(r.rank as i64)))
            .dates("date", w.iter().map(|r| Some(r.residual.date)))
            .strings("entity", w.iter().map(|r| Some(&r.residual.entity)))
            .strings("method", w.iter().map(|r| Some(&r.residual.method)))
            .strings("instrument", w.iter().map(|r| Some(&r.residual.instrument)))
            .strings("tenor_or_bond", w.iter().map(|r| Some(&r.residual.tenor)))
            .floats("market", w.iter().map(|r| Some(r.residual.market)))
            .floats("model", w.iter().map(|r| Some(r.residual.model)))
            .floats("residual_bp", w.iter().map(|r| Some(r.residual.residual_bp)))
            .bools("converged", w.iter().map(|r| Some(r.residual.converged)))
            .finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let (rk, d, e, m, ins, t) = (
            ints(df, path, "rank")?,
            dates(df, path, "date")?,
            strs(df, path, "entity")?,
            strs(df, path, "method")?,
            strs(df, path, "instrument")?,
            strs(df, path, "tenor_or_bond")?,
        );
        let (mk, mo, r, cv) = (
            floats(df, path, "market")?,
            floats(df, path, "model")?,
            floats(df, path, "residual_bp")?,
            bools(df, path, "converged")?,
        );
        let text = |v: &Option<String>| -> Arc<str> { Arc::from(v.as_deref().unwrap_or("")) };
        Ok((0..df.height())
            .map(|i| WorstResidualRow {
                rank: count(rk[i]),
                residual: ResidualObservation {
                    date: d[i].unwrap_or_default(),
                    entity: text(&e[i]),
                    method: text(&m[i]),
                    instrument: text(&ins[i]),
                    tenor: text(&t[i]),
                    market: mk[i].unwrap_or(f64::NAN),
                    model: mo[i].unwrap_or(f64::NAN),
                    residual_bp: r[i].unwrap_or(f64::NAN),
                    converged: cv[i].unwrap_or(false),
                },
            })
            .collect())
    }
}

impl Table for RepricingShare {
    const NAME: &'static str = "residual_repricing";
    const COLUMNS: &'static [Column] = &[
        col("method", Text),
        col("curves", Int),
        col("repricing", Int),
        col("share", Float),
        col("tolerance_bp", Float),
    ];

    fn frame(s: &[Self]) -> Result<DataFrame> {
        TableBuilder::new()
            .strings("method", s.iter().map(|r| Some(&r.method)))
            .ints("curves", s.iter().map(|r| Some(r.curves as i64)))
            .ints("repricing", s.iter().map(|r| Some(r.repricing as i64)))
            .floats("share", s.iter().map(|r| Some(r.share)))
            .floats("tolerance_bp", s.iter().map(|r| Some(r.tolerance_bp)))
            .finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let (mut m, c, r, s, t) = (
            strs(df, path, "method")?,
            ints(df, path, "curves")?,
            ints(df, path, "repricing")?,
            floats(df, path, "share")?,
            floats(df, path, "tolerance_bp")?,
        );
        Ok((0..df.height())
            .map(|i| RepricingShare {
                method: m[i].take().unwrap_or_default(),
                curves: count(c[i]),
                repricing: count(r[i]),
                share: s[i].unwrap_or(f64::NAN),
                tolerance_bp: t[i].unwrap_or(f64::NAN),
            })
            .collect())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stability::{BreakStatus, Scope};
    use crate::tables::testing::{refuses_a_missing_column, round_trip};
    use chrono::NaiveDate;

    fn day() -> NaiveDate {
        NaiveDate::from_ymd_opt(2024, 5, 2).unwrap()
    }

    #[test]
    fn stability_round_trips() {
        let row = StabilityRow {
            period: "2024Q2".into(),
            series: "hazard_5y".into(),
            scope: Scope::Entity,
            key: "Alder Works".into(),
            n: 60,
            mean: Some(0.02),
            sd: Some(0.001),
            cv: Some(0.05),
            median: Some(0.02),
            p10: Some(0.019),
            p90: Some(0.021),
            moves: Some(59),
            max_abs_move: Some(0.002),
            max_move_date: Some(day()),
            large_move_share: Some(0.01),
            param_rel_move: Some(0.004),
            market_rel_move: Some(0.003),
            move_ratio: Some(1.3),
            failures: None,
            infeasible: None,
            mean_change: Some(-0.02),
            median_change: None,
        };
        let rows = vec![
            row.clone(),
            StabilityRow {
                scope: Scope::Universe,
                key: "all".into(),
                moves: None,
                failures: Some(2),
                infeasible: Some(0),
                ..row
            },
        ];
        assert_eq!(round_trip(&rows), rows);
        refuses_a_missing_column(&rows);
    }

    #[test]
    fn stability_bands_and_psi_round_trip() {
        let rows = vec![CrossSectionRow {
            date: day(),
            period: "2024Q2".into(),
            series: "pd_1y".into(),
            scope: Scope::Grade,
            key: "3".into(),
            n: 41,
            p10: 0.001,
            p50: 0.004,
            p90: 0.02,
        }];
        assert_eq!(round_trip(&rows), rows);
        refuses_a_missing_column(&rows);
        let psi = vec![PsiRecord {
            series: "pd_1y".into(),
            period: "2024Q2".into(),
            previous_period: "2024Q1".into(),
            n_previous: 240,
            n_current: 238,
            psi: Some(0.04),
            buckets: 10,
        }];
        assert_eq!(round_trip(&psi), psi);
        refuses_a_missing_column(&psi);
    }

    #[test]
    fn stability_breaks_round_trip() {
        let rows = vec![BreakRow {
            entity: "Alder Works".into(),
            series: "cir_kappa".into(),
            window: "2024Q2".into(),
            target: "levels",
            n: 61,
            status: BreakStatus::Tested,
            adf_t: Some(-4.1),
            adf_critical: Some(-2.91),
            changes_r1: Some(-0.48),
            lags: Some(3),
            long_run_sd: Some(0.02),
            statistic: Some(1.9),
            p_value: Some(0.0015),
            break_date: Some(day()),
        }];
        assert_eq!(round_trip(&rows), rows);
        refuses_a_missing_column(&rows);
    }

    #[test]
    fn residual_review_tables_round_trip() {
        let curves = vec![CurveResidualRow {
            date: day(),
            entity: "Alder Works".into(),
            method: "bootstrap".into(),
            n: 8,
            rmse_bp: 1e-12,
            max_abs_bp: 3e-12,
            worst_tenor: "7Y".into(),
            converged: true,
            reprices: true,
        }];
        assert_eq!(round_trip(&curves), curves);
        refuses_a_missing_column(&curves);
        let tenors = vec![TenorResidualRow {
            method: "cir".into(),
            tenor: "5Y".into(),
            n: 700,
            q01: -3.0,
            q05: -1.0,
            q50: 0.0,
            q95: 1.0,
            q99: 3.0,
            abs_q01: 0.0,
            abs_q05: 0.01,
            abs_q50: 0.4,
            abs_q95: 1.2,
            abs_q99: 3.1,
        }];
        assert_eq!(round_trip(&tenors), tenors);
        refuses_a_missing_column(&tenors);
        let obs = ResidualObservation {
            date: day(),
            entity: "Alder Works".into(),
            method: "bond_fit".into(),
            instrument: "bond_price".into(),
            tenor: "AW 4.5 2031".into(),
            market: 99.5,
            model: 99.7,
            residual_bp: 4.1,
            converged: true,
        };
        let worst = vec![WorstResidualRow { rank: 1, residual: obs }];
        assert_eq!(round_trip(&worst), worst);
        refuses_a_missing_column(&worst);
        let shares = vec![RepricingShare {
            method: "bootstrap".into(),
            curves: 1000,
            repricing: 999,
            share: 0.999,
            tolerance_bp: 1e-6,
        }];
        assert_eq!(round_trip(&shares), shares);
        refuses_a_missing_column(&shares);
    }
}
