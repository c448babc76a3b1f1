//! The backtest's tables: `backtest_buckets` (implied against realised default rates per
//! cohort, horizon and bucket, every recovery scenario told apart by `recovery`),
//! `backtest_hosmer_lemeshow`, `backtest_discrimination`, `backtest_verdicts`, `risk_premia`
//! and `backtest_history` (the cohort-history comparison). `backtest_members`, the rows all of
//! these are computed from, is in `parts.rs` (the part folders carry it too).

use super::parquet::TableBuilder;
use super::readback::{floats, intern, ints, strs, text_form};
use super::{col, Column, Kind::*, Table};
use crate::backtest::{
    BucketRow, DiscriminationRow, HistoryRow, HosmerLemeshowRow, MigrationRow, RiskPremiumRow, TermStructureRow,
    VerdictRow,
};
use crate::error::Result;
use polars::prelude::DataFrame;
use std::path::Path;

/// A row of `backtest_buckets`: a bucket test under one recovery.
#[derive(Debug, Clone, PartialEq)]
pub struct BucketRecord {
    pub recovery: f64,
    pub row: BucketRow,
}

/// A row of `backtest_hosmer_lemeshow`: the test over a cohort's buckets under one recovery.
#[derive(Debug, Clone, PartialEq)]
pub struct HosmerLemeshowRecord {
    pub recovery: f64,
    pub row: HosmerLemeshowRow,
}

fn whole(v: Option<i64>) -> u64 {
    v.unwrap_or(0).max(0) as u64
}

impl Table for BucketRecord {
    const NAME: &'static str = "backtest_buckets";
    const COLUMNS: &'static [Column] = &[
        col("cohort", Text),
        col("horizon", Int),
        col("bucket", Text),
        col("level", Float),
        col("recovery", Float),
        col("n", Int),
        col("defaults", Int),
        col("n_censored", Int),
        col("n_incomplete", Int),
        col("realised_rate", Float),
        col("rate_method", Text),
        col("km_lo", Float),
        col("km_hi", Float),
        col("implied_pd", Float),
        col("cp_lo", Float),
        col("cp_hi", Float),
        col("jeffreys_lo", Float),
        col("jeffreys_hi", Float),
        col("wilson_lo", Float),
        col("wilson_hi", Float),
        col("p_binom_upper", Float),
        col("p_binom_lower", Float),
        col("p_jeffreys", Float),
        col("zone", Text),
        col("zone_lower", Text),
        col("rho", Float),
        col("p_vasicek_upper", Float),
        col("p_vasicek_lower", Float),
        col("vasicek_lo", Float),
        col("vasicek_hi", Float),
        col("zone_vasicek", Text),
        col("outcome_source", Text),
    ];

    fn frame(rows: &[Self]) -> Result<DataFrame> {
        let rows: Vec<(f64, &BucketRow)> = rows.iter().map(|r| (r.recovery, &r.row)).collect();
        let fl = |get: fn(&BucketRow) -> Option<f64>| rows.iter().map(move |(_, b)| get(b)).collect::<Vec<_>>();
        let zone = |get: fn(&BucketRow) -> Option<crate::stats::Zone>| {
            rows.iter().map(move |(_, b)| get(b).map(|z| z.as_str())).collect::<Vec<_>>()
        };
        TableBuilder::new()
            .strings("cohort", rows.iter().map(|(_, b)| Some(&b.cohort)))
            .ints("horizon", rows.iter().map(|(_, b)| Some(b.horizon_years as i64)))
            .strings("bucket", rows.iter().map(|(_, b)| Some(&b.bucket)))
            .floats("level", rows.iter().map(|(_, b)| Some(b.level)))
            .floats("recovery", rows.iter().map(|(r, _)| Some(*r)))
            .ints("n", rows.iter().map(|(_, b)| Some(b.n as i64)))
            .ints("defaults", rows.iter().map(|(_, b)| Some(b.defaults as i64)))
            .ints("n_censored", rows.iter().map(|(_, b)| Some(b.n_censored as i64)))
            .ints("n_incomplete", rows.iter().map(|(_, b)| Some(b.n_incomplete as i64)))
            .floats("realised_rate", fl(|b| b.realised_rate))
            .strings("rate_method", rows.iter().map(|(_, b)| b.rate_method.map(|m| m.as_str())))
            .floats("km_lo", fl(|b| b.km_lo))
            .floats("km_hi", fl(|b| b.km_hi))
            .floats("implied_pd", fl(|b| b.implied_pd))
            .floats("cp_lo", fl(|b| b.cp_lo))
            .floats("cp_hi", fl(|b| b.cp_hi))
            .floats("jeffreys_lo", fl(|b| b.jeffreys_lo))
            .floats("jeffreys_hi", fl(|b| b.jeffreys_hi))
            .floats("wilson_lo", fl(|b| b.wilson_lo))
            .floats("wilson_hi", fl(|b| b.wilson_hi))
            .floats("p_binom_upper", fl(|b| b.p_binom_upper))
            .floats("p_binom_lower", fl(|b| b.p_binom_lower))
            .floats("p_jeffreys", fl(|b| b.p_jeffreys))
            .strings("zone", zone(|b| b.zone))
            .strings("zone_lower", zone(|b| b.zone_lower))
            .floats("rho", fl(|b| b.rho))
            .floats("p_vasicek_upper", fl(|b| b.p_vasicek_upper))
            .floats("p_vasicek_lower", fl(|b| b.p_vasicek_lower))
            .floats("vasicek_lo", fl(|b| b.vasicek_lo))
            .floats("vasicek_hi", fl(|b| b.vasicek_hi))
            .strings("zone_vasicek", zone(|b| b.zone_vasicek))
            .strings("outcome_source", rows.iter().map(|(_, b)| Some(b.outcome_source)))
            .finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let f = |name: &str| floats(df, path, name);
        let (mut co, h, mut bu, lv, rc) = (
            strs(df, path, "cohort")?,
            ints(df, path, "horizon")?,
            strs(df, path, "bucket")?,
            f("level")?,
            f("recovery")?,
        );
        let (n, d, nc, ni) = (
            ints(df, path, "n")?,
            ints(df, path, "defaults")?,
            ints(df, path, "n_censored")?,
            ints(df, path, "n_incomplete")?,
        );
        let (rr, rm, kl, kh) = (f("realised_rate")?, strs(df, path, "rate_method")?, f("km_lo")?, f("km_hi")?);
        let (pd, cl, ch, jl, jh, wl, wh, pu, pl, pj) = (
            f("implied_pd")?,
            f("cp_lo")?,
            f("cp_hi")?,
            f("jeffreys_lo")?,
            f("jeffreys_hi")?,
            f("wilson_lo")?,
            f("wilson_hi")?,
            f("p_binom_upper")?,
            f("p_binom_lower")?,
            f("p_jeffreys")?,
        );
        let (rho, vu, vl, vlo, vhi) =
            (f("rho")?, f("p_vasicek_upper")?, f("p_vasicek_lower")?, f("vasicek_lo")?, f("vasicek_hi")?);
        let (z, zl, zv, os) = (
            strs(df, path, "zone")?,
            strs(df, path, "zone_lower")?,
            strs(df, path, "zone_vasicek")?,
            strs(df, path, "outcome_source")?,
        );
        let zone = |v: &Option<String>, col: &str, i: usize| -> Result<Option<crate::stats::Zone>> {
            v.as_deref().map(|z| text_form(Some(z), col, path, i)).transpose()
        };
        (0..df.height())
            .map(|i| {
                Ok(BucketRecord {
                    recovery: rc[i].unwrap_or(f64::NAN),
                    row: BucketRow {
                        cohort: co[i].take().unwrap_or_default(),
                        horizon_years: h[i].unwrap_or(0) as u32,
                        bucket: bu[i].take().unwrap_or_default(),
                        level: lv[i].unwrap_or(f64::NAN),
                        n: whole(n[i]),
                        defaults: whole(d[i]),
                        n_censored: whole(nc[i]),
                        n_incomplete: whole(ni[i]),
                        realised_rate: rr[i],
                        rate_method: rm[i]
                            .as_deref()
                            .map(|m| text_form(Some(m), "rate_method", path, i))
                            .transpose()?,
                        km_lo: kl[i],
                        km_hi: kh[i],
                        implied_pd: pd[i],
                        cp_lo: cl[i],
                        cp_hi: ch[i],
                        jeffreys_lo: jl[i],
                        jeffreys_hi: jh[i],
                        wilson_lo: wl[i],
                        wilson_hi: wh[i],
                        p_binom_upper: pu[i],
                        p_binom_lower: pl[i],
                        p_jeffreys: pj[i],
                        zone: zone(&z[i], "zone", i)?,
                        zone_lower: zone(&zl[i], "zone_lower", i)?,
                        rho: rho[i],
                        p_vasicek_upper: vu[i],
                        p_vasicek_lower: vl[i],
                        vasicek_lo: vlo[i],
                        vasicek_hi: vhi[i],
                        zone_vasicek: zone(&zv[i], "zone_vasicek", i)?,
                        outcome_source: intern(os[i].as_deref().unwrap_or("")),
                    },
                })
            })
            .collect()
    }
}

impl Table for HosmerLemeshowRecord {
    const NAME: &'static str = "backtest_hosmer_lemeshow";
    const COLUMNS: &'static [Column] = &[
        col("cohort", Text),
        col("horizon", Int),
        col("recovery", Float),
        col("buckets", Int),
        col("statistic", Float),
        col("p_value", Float),
        col("n", Int),
        col("brier", Float),
        col("spiegelhalter_z", Float),
        col("spiegelhalter_p", Float),
        col("hhi", Float),
        col("note", Text),
    ];

    fn frame(hl: &[Self]) -> Result<DataFrame> {
        TableBuilder::new()
            .strings("cohort", hl.iter().map(|b| Some(&b.row.cohort)))
            .ints("horizon", hl.iter().map(|b| Some(b.row.horizon_years as i64)))
            .floats("recovery", hl.iter().map(|b| Some(b.recovery)))
            .ints("buckets", hl.iter().map(|b| Some(b.row.buckets as i64)))
            .floats("statistic", hl.iter().map(|b| b.row.statistic))
            .floats("p_value", hl.iter().map(|b| b.row.p_value))
            .ints("n", hl.iter().map(|b| Some(b.row.n as i64)))
            .floats("brier", hl.iter().map(|b| b.row.brier))
            .floats("spiegelhalter_z", hl.iter().map(|b| b.row.spiegelhalter_z))
            .floats("spiegelhalter_p", hl.iter().map(|b| b.row.spiegelhalter_p))
            .floats("hhi", hl.iter().map(|b| b.row.hhi))
            .strings("note", hl.iter().map(|b| b.row.note.as_ref()))
            .finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let (mut co, h, rc, bu, st, p, mut no) = (
            strs(df, path, "cohort")?,
            ints(df, path, "horizon")?,
            floats(df, path, "recovery")?,
            ints(df, path, "buckets")?,
            floats(df, path, "statistic")?,
            floats(df, path, "p_value")?,
            strs(df, path, "note")?,
        );
        let (n, br, sz, sp, hhi) = (
            ints(df, path, "n")?,
            floats(df, path, "brier")?,
            floats(df, path, "spiegelhalter_z")?,
            floats(df, path, "spiegelhalter_p")?,
            floats(df, path, "hhi")?,
        );
        Ok((0..df.height())
            .map(|i| HosmerLemeshowRecord {
                recovery: rc[i].unwrap_or(f64::NAN),
                row: HosmerLemeshowRow {
                    cohort: co[i].take().unwrap_or_default(),
                    horizon_years: h[i].unwrap_or(0) as u32,
                    buckets: whole(bu[i]) as usize,
                    statistic: st[i],
                    p_value: p[i],
                    note: no[i].take(),
                    n: whole(n[i]),
                    brier: br[i],
                    spiegelhalter_z: sz[i],
                    spiegelhalter_p: sp[i],
                    hhi: hhi[i],
                },
            })
            .collect())
    }
}

/// A row of `backtest_discrimination` under one recovery.
#[derive(Debug, Clone, PartialEq)]
pub struct DiscriminationRecord {
    pub recovery: f64,
    pub row: DiscriminationRow,
}

impl Table for DiscriminationRecord {
    const NAME: &'static str = "backtest_discrimination";
    const COLUMNS: &'static [Column] = &[
        col("cohort", Text),
        col("horizon", Int),
        col("score", Text),
        col("level", Float),
        col("recovery", Float),
        col("n", Int),
        col("defaults", Int),
        col("auc", Float),
        col("auc_se", Float),
        col("auc_lo", Float),
        col("auc_hi", Float),
        col("gini", Float),
        col("p_no_power", Float),
        col("p_vs_grade", Float),
        col("auc_reference", Float),
        col("p_vs_reference", Float),
        col("note", Text),
    ];

    fn frame(rows: &[Self]) -> Result<DataFrame> {
        let fl = |get: fn(&DiscriminationRow) -> Option<f64>| rows.iter().map(move |r| get(&r.row)).collect::<Vec<_>>();
        TableBuilder::new()
            .strings("cohort", rows.iter().map(|r| Some(&r.row.cohort)))
            .ints("horizon", rows.iter().map(|r| Some(i64::from(r.row.horizon_years))))
            .strings("score", rows.iter().map(|r| Some(r.row.score.as_str())))
            .floats("level", rows.iter().map(|r| Some(r.row.level)))
            .floats("recovery", rows.iter().map(|r| Some(r.recovery)))
            .ints("n", rows.iter().map(|r| Some(r.row.n as i64)))
            .ints("defaults", rows.iter().map(|r| Some(r.row.defaults as i64)))
            .floats("auc", fl(|r| r.auc))
            .floats("auc_se", fl(|r| r.auc_se))
            .floats("auc_lo", fl(|r| r.auc_lo))
            .floats("auc_hi", fl(|r| r.auc_hi))
            .floats("gini", fl(|r| r.gini))
            .floats("p_no_power", fl(|r| r.p_no_power))
            .floats("p_vs_grade", fl(|r| r.p_vs_grade))
            .floats("auc_reference", fl(|r| r.auc_reference))
            .floats("p_vs_reference", fl(|r| r.p_vs_reference))
            .strings("note", rows.iter().map(|r| r.row.note.as_ref()))
            .finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let f = |name: &str| floats(df, path, name);
        let (mut co, h, sc, lv, rc, n, d) = (
            strs(df, path, "cohort")?,
            ints(df, path, "horizon")?,
            strs(df, path, "score")?,
            f("level")?,
            f("recovery")?,
            ints(df, path, "n")?,
            ints(df, path, "defaults")?,
        );
        let (auc, se, lo, hi, gi, pn, pg, mut no) = (
            f("auc")?,
            f("auc_se")?,
            f("auc_lo")?,
            f("auc_hi")?,
            f("gini")?,
            f("p_no_power")?,
            f("p_vs_grade")?,
            strs(df, path, "note")?,
        );
        let (ar, pr) = (f("auc_reference")?, f("p_vs_reference")?);
        (0..df.height())
            .map(|i| {
                Ok(DiscriminationRecord {
                    recovery: rc[i].unwrap_or(f64::NAN),
                    row: DiscriminationRow {
                        cohort: co[i].take().unwrap_or_default(),
                        horizon_years: h[i].unwrap_or(0) as u32,
                        score: text_form(sc[i].as_deref(), "score", path, i)?,
                        level: lv[i].unwrap_or(f64::NAN),
                        n: whole(n[i]),
                        defaults: whole(d[i]),
                        auc: auc[i],
                        auc_se: se[i],
                        auc_lo: lo[i],
                        auc_hi: hi[i],
                        gini: gi[i],
                        p_no_power: pn[i],
                        p_vs_grade: pg[i],
                        auc_reference: ar[i],
                        p_vs_reference: pr[i],
                        note: no[i].take(),
                    },
                })
            })
            .collect()
    }
}

/// A row of `backtest_term_structure` under one recovery.
#[derive(Debug, Clone, PartialEq)]
pub struct TermStructureRecord {
    pub recovery: f64,
    pub row: TermStructureRow,
}

impl Table for TermStructureRecord {
    const NAME: &'static str = "backtest_term_structure";
    const COLUMNS: &'static [Column] = &[
        col("bucket", Text),
        col("horizon", Int),
        col("level", Float),
        col("recovery", Float),
        col("members", Int),
        col("defaults", Int),
        col("at_risk_at_horizon", Int),
        col("realised_rate", Float),
        col("rate_lo", Float),
        col("rate_hi", Float),
        col("implied_pd", Float),
        col("expected_defaults", Float),
        col("observed_to_expected", Float),
        col("p_upper", Float),
        col("p_lower", Float),
        col("zone", Text),
        col("note", Text),
    ];

    fn frame(rows: &[Self]) -> Result<DataFrame> {
        let fl = |get: fn(&TermStructureRow) -> Option<f64>| rows.iter().map(move |r| get(&r.row)).collect::<Vec<_>>();
        TableBuilder::new()
            .strings("bucket", rows.iter().map(|r| Some(&r.row.bucket)))
            .ints("horizon", rows.iter().map(|r| Some(i64::from(r.row.horizon_years))))
            .floats("level", rows.iter().map(|r| Some(r.row.level)))
            .floats("recovery", rows.iter().map(|r| Some(r.recovery)))
            .ints("members", rows.iter().map(|r| Some(r.row.members as i64)))
            .ints("defaults", rows.iter().map(|r| Some(r.row.defaults as i64)))
            .ints("at_risk_at_horizon", rows.iter().map(|r| Some(r.row.at_risk_at_horizon as i64)))
            .floats("realised_rate", fl(|r| r.realised_rate))
            .floats("rate_lo", fl(|r| r.rate_lo))
            .floats("rate_hi", fl(|r| r.rate_hi))
            .floats("implied_pd", fl(|r| r.implied_pd))
            .floats("expected_defaults", fl(|r| r.expected_defaults))
            .floats("observed_to_expected", fl(|r| r.observed_to_expected))
            .floats("p_upper", fl(|r| r.p_upper))
            .floats("p_lower", fl(|r| r.p_lower))
            .strings("zone", rows.iter().map(|r| r.row.zone.map(|z| z.as_str())))
            .strings("note", rows.iter().map(|r| r.row.note.as_ref()))
            .finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let f = |name: &str| floats(df, path, name);
        let (mut bu, h, lv, rc, me, d, ar) = (
            strs(df, path, "bucket")?,
            ints(df, path, "horizon")?,
            f("level")?,
            f("recovery")?,
            ints(df, path, "members")?,
            ints(df, path, "defaults")?,
            ints(df, path, "at_risk_at_horizon")?,
        );
        let (rr, lo, hi, pd, ex, oe, pu, pl, zo, mut no) = (
            f("realised_rate")?,
            f("rate_lo")?,
            f("rate_hi")?,
            f("implied_pd")?,
            f("expected_defaults")?,
            f("observed_to_expected")?,
            f("p_upper")?,
            f("p_lower")?,
            strs(df, path, "zone")?,
            strs(df, path, "note")?,
        );
        (0..df.height())
            .map(|i| {
                Ok(TermStructureRecord {
                    recovery: rc[i].unwrap_or(f64::NAN),
                    row: TermStructureRow {
                        bucket: bu[i].take().unwrap_or_default(),
                        horizon_years: h[i].unwrap_or(0) as u32,
                        level: lv[i].unwrap_or(f64::NAN),
                        members: whole(me[i]),
                        defaults: whole(d[i]),
                        at_risk_at_horizon: whole(ar[i]),
                        realised_rate: rr[i],
                        rate_lo: lo[i],
                        rate_hi: hi[i],
                        implied_pd: pd[i],
                        expected_defaults: ex[i],
                        observed_to_expected: oe[i],
                        p_upper: pu[i],
                        p_lower: pl[i],
                        zone: zo[i].as_deref().map(|v| text_form(Some(v), "zone", path, i)).transpose()?,
                        note: no[i].take(),
                    },
                })
            })
            .collect()
    }
}

impl Table for MigrationRow {
    const NAME: &'static str = "backtest_migration";
    const COLUMNS: &'static [Column] = &[
        col("cohort", Text),
        col("from_grade", Int),
        col("to", Text),
        col("count", Int),
        col("from_total", Int),
        col("share", Float),
    ];

    fn frame(rows: &[Self]) -> Result<DataFrame> {
        TableBuilder::new()
            .strings("cohort", rows.iter().map(|r| Some(&r.cohort)))
            .ints("from_grade", rows.iter().map(|r| Some(i64::from(r.from_grade))))
            .strings("to", rows.iter().map(|r| Some(&r.to)))
            .ints("count", rows.iter().map(|r| Some(r.count as i64)))
            .ints("from_total", rows.iter().map(|r| Some(r.from_total as i64)))
            .floats("share", rows.iter().map(|r| Some(r.share)))
            .finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let (mut co, g, mut to, n, t, sh) = (
            strs(df, path, "cohort")?,
            ints(df, path, "from_grade")?,
            strs(df, path, "to")?,
            ints(df, path, "count")?,
            ints(df, path, "from_total")?,
            floats(df, path, "share")?,
        );
        Ok((0..df.height())
            .map(|i| MigrationRow {
                cohort: co[i].take().unwrap_or_default(),
                from_grade: g[i].unwrap_or(0) as u32,
                to: to[i].take().unwrap_or_default(),
                count: whole(n[i]),
                from_total: whole(t[i]),
                share: sh[i].unwrap_or(f64::NAN),
            })
            .collect())
    }
}

impl Table for VerdictRow {
    const NAME: &'static str = "backtest_verdicts";
    const COLUMNS: &'static [Column] = &[
        col("family", Text),
        col("reading", Text),
        col("tests", Int),
        col("against", Int),
        col("strongly_against", Int),
        col("extreme_p", Float),
        col("status", Text),
        col("note", Text),
        col("over_predicting", Int),
        col("under_predicting", Int),
    ];

    fn frame(rows: &[Self]) -> Result<DataFrame> {
        TableBuilder::new()
            .strings("family", rows.iter().map(|r| Some(r.family)))
            .strings("reading", rows.iter().map(|r| Some(r.reading)))
            .ints("tests", rows.iter().map(|r| Some(r.tests as i64)))
            .ints("against", rows.iter().map(|r| Some(r.against as i64)))
            .ints("strongly_against", rows.iter().map(|r| Some(r.strongly_against as i64)))
            .floats("extreme_p", rows.iter().map(|r| r.extreme_p))
            .strings("status", rows.iter().map(|r| Some(r.status.as_str())))
            .strings("note", rows.iter().map(|r| r.note.as_ref()))
            .ints("over_predicting", rows.iter().map(|r| r.over_predicting.map(|x| x as i64)))
            .ints("under_predicting", rows.iter().map(|r| r.under_predicting.map(|x| x as i64)))
            .finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let (fa, re, t, a, sa, p, st) = (
            strs(df, path, "family")?,
            strs(df, path, "reading")?,
            ints(df, path, "tests")?,
            ints(df, path, "against")?,
            ints(df, path, "strongly_against")?,
            floats(df, path, "extreme_p")?,
            strs(df, path, "status")?,
        );
        let mut note = strs(df, path, "note")?;
        let (ov, un) = (ints(df, path, "over_predicting")?, ints(df, path, "under_predicting")?);
        (0..df.height())
            .map(|i| {
                Ok(VerdictRow {
                    note: note[i].take(),
                    over_predicting: ov[i].map(|x| x.max(0) as u64),
                    under_predicting: un[i].map(|x| x.max(0) as u64),
                    family: intern(fa[i].as_deref().unwrap_or("")),
                    reading: intern(re[i].as_deref().unwrap_or("")),
                    tests: whole(t[i]),
                    against: whole(a[i]),
                    strongly_against: whole(sa[i]),
                    extreme_p: p[i],
                    status: text_form(st[i].as_deref(), "status", path, i)?,
                })
            })
            .collect()
    }
}

impl Table for RiskPremiumRow {
    const NAME: &'static str = "risk_premia";
    const COLUMNS: &'static [Column] = &[
        col("cohort", Text),
        col("bucket", Text),
        col("horizon", Int),
        col("level", Float),
        col("recovery", Float),
        col("members", Int),
        col("exposure_years", Float),
        col("defaults", Int),
        col("lambda_p", Float),
        col("lambda_p_lo", Float),
        col("lambda_p_hi", Float),
        col("lambda_q", Float),
        col("ratio", Float),
        col("ratio_lo", Float),
        col("ratio_hi", Float),
        col("spread_bp", Float),
        col("spread_quotes", Int),
        col("el_spread_bp", Float),
        col("el_spread_lo_bp", Float),
        col("el_spread_hi_bp", Float),
        col("premium_spread_bp", Float),
        col("premium_spread_lo_bp", Float),
        col("premium_spread_hi_bp", Float),
    ];

    fn frame(rp: &[Self]) -> Result<DataFrame> {
        TableBuilder::new()
            .strings("cohort", rp.iter().map(|b| Some(&b.cohort)))
            .strings("bucket", rp.iter().map(|b| Some(&b.bucket)))
            .ints("horizon", rp.iter().map(|b| Some(b.horizon_years as i64)))
            .floats("level", rp.iter().map(|b| Some(b.level)))
            .floats("recovery", rp.iter().map(|b| Some(b.recovery)))
            .ints("members", rp.iter().map(|b| Some(b.members as i64)))
            .floats("exposure_years", rp.iter().map(|b| Some(b.exposure_years)))
            .ints("defaults", rp.iter().map(|b| Some(b.defaults as i64)))
            .floats("lambda_p", rp.iter().map(|b| b.lambda_p))
            .floats("lambda_p_lo", rp.iter().map(|b| b.lambda_p_lo))
            .floats("lambda_p_hi", rp.iter().map(|b| b.lambda_p_hi))
            .floats("lambda_q", rp.iter().map(|b| b.lambda_q))
            .floats("ratio", rp.iter().map(|b| b.ratio))
            .floats("ratio_lo", rp.iter().map(|b| b.ratio_lo))
            .floats("ratio_hi", rp.iter().map(|b| b.ratio_hi))
            .floats("spread_bp", rp.iter().map(|b| b.spread_bp))
            .ints("spread_quotes", rp.iter().map(|b| Some(b.spread_quotes as i64)))
            .floats("el_spread_bp", rp.iter().map(|b| b.el_spread_bp))
            .floats("el_spread_lo_bp", rp.iter().map(|b| b.el_spread_lo_bp))
            .floats("el_spread_hi_bp", rp.iter().map(|b| b.el_spread_hi_bp))
            .floats("premium_spread_bp", rp.iter().map(|b| b.premium_spread_bp))
            .floats("premium_spread_lo_bp", rp.iter().map(|b| b.premium_spread_lo_bp))
            .floats("premium_spread_hi_bp", rp.iter().map(|b| b.premium_spread_hi_bp))
            .finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let f = |name: &str| floats(df, path, name);
        let (mut co, mut bu, h, lv, rc, me, ex, d) = (
            strs(df, path, "cohort")?,
            strs(df, path, "bucket")?,
            ints(df, path, "horizon")?,
            f("level")?,
            f("recovery")?,
            ints(df, path, "members")?,
            f("exposure_years")?,
            ints(df, path, "defaults")?,
        );
        let (lp, lpl, lph, lq, ra, ral, rah, sp, sq, el, pr) = (
            f("lambda_p")?,
            f("lambda_p_lo")?,
            f("lambda_p_hi")?,
            f("lambda_q")?,
            f("ratio")?,
            f("ratio_lo")?,
            f("ratio_hi")?,
            f("spread_bp")?,
            ints(df, path, "spread_quotes")?,
            f("el_spread_bp")?,
            f("premium_spread_bp")?,
        );
        let (ell, elh, prl, prh) =
            (f("el_spread_lo_bp")?, f("el_spread_hi_bp")?, f("premium_spread_lo_bp")?, f("premium_spread_hi_bp")?);
        Ok((0..df.height())
            .map(|i| RiskPremiumRow {
                cohort: co[i].take().unwrap_or_default(),
                bucket: bu[i].take().unwrap_or_default(),
                horizon_years: h[i].unwrap_or(0) as u32,
                level: lv[i].unwrap_or(f64::NAN),
                recovery: rc[i].unwrap_or(f64::NAN),
                members: whole(me[i]),
                exposure_years: ex[i].unwrap_or(f64::NAN),
                defaults: whole(d[i]),
                lambda_p: lp[i],
                lambda_p_lo: lpl[i],
                lambda_p_hi: lph[i],
                lambda_q: lq[i],
                ratio: ra[i],
                ratio_lo: ral[i],
                ratio_hi: rah[i],
                spread_bp: sp[i],
                spread_quotes: whole(sq[i]),
                el_spread_bp: el[i],
                el_spread_lo_bp: ell[i],
                el_spread_hi_bp: elh[i],
                premium_spread_bp: pr[i],
                premium_spread_lo_bp: prl[i],
                premium_spread_hi_bp: prh[i],
            })
            .collect())
    }
}

impl Table for HistoryRow {
    const NAME: &'static str = "backtest_history";
    const COLUMNS: &'static [Column] = &[
        col("cohort", Text),
        col("grade", Int),
        col("level", Float),
        col("obligors", Int),
        col("defaults", Int),
        col("withdrawn", Int),
        col("realised_rate", Float),
        col("cp_lo", Float),
        col("cp_hi", Float),
        col("jeffreys_lo", Float),
        col("jeffreys_hi", Float),
        col("implied_pd", Float),
        col("p_binom_upper", Float),
        col("p_jeffreys", Float),
        col("zone", Text),
        col("lambda_p", Float),
        col("lambda_p_lo", Float),
        col("lambda_p_hi", Float),
        col("lambda_q", Float),
        col("ratio", Float),
        col("ratio_lo", Float),
        col("ratio_hi", Float),
        col("outcome_source", Text),
    ];

    fn frame(h: &[Self]) -> Result<DataFrame> {
        TableBuilder::new()
            .strings("cohort", h.iter().map(|b| Some(&b.cohort)))
            .ints("grade", h.iter().map(|b| Some(b.grade as i64)))
            .floats("level", h.iter().map(|b| Some(b.level)))
            .ints("obligors", h.iter().map(|b| Some(b.obligors as i64)))
            .ints("defaults", h.iter().map(|b| Some(b.defaults as i64)))
            .ints("withdrawn", h.iter().map(|b| b.withdrawn.map(|x| x as i64)))
            .floats("realised_rate", h.iter().map(|b| Some(b.realised_rate)))
            .floats("cp_lo", h.iter().map(|b| Some(b.cp_lo)))
            .floats("cp_hi", h.iter().map(|b| Some(b.cp_hi)))
            .floats("jeffreys_lo", h.iter().map(|b| Some(b.jeffreys_lo)))
            .floats("jeffreys_hi", h.iter().map(|b| Some(b.jeffreys_hi)))
            .floats("implied_pd", h.iter().map(|b| b.implied_pd))
            .floats("p_binom_upper", h.iter().map(|b| b.p_binom_upper))
            .floats("p_jeffreys", h.iter().map(|b| b.p_jeffreys))
            .strings("zone", h.iter().map(|b| b.zone.map(|z| z.as_str())))
            .floats("lambda_p", h.iter().map(|b| Some(b.lambda_p)))
            .floats("lambda_p_lo", h.iter().map(|b| Some(b.lambda_p_lo)))
            .floats("lambda_p_hi", h.iter().map(|b| Some(b.lambda_p_hi)))
            .floats("lambda_q", h.iter().map(|b| b.lambda_q))
            .floats("ratio", h.iter().map(|b| b.ratio))
            .floats("ratio_lo", h.iter().map(|b| b.ratio_lo))
            .floats("ratio_hi", h.iter().map(|b| b.ratio_hi))
            .strings("outcome_source", h.iter().map(|b| Some(b.outcome_source)))
            .finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let f = |name: &str| floats(df, path, name);
        let (mut co, g, lv, ob, d, w) = (
            strs(df, path, "cohort")?,
            ints(df, path, "grade")?,
            f("level")?,
            ints(df, path, "obligors")?,
            ints(df, path, "defaults")?,
            ints(df, path, "withdrawn")?,
        );
        let (rr, cl, ch, jl, jh, pd, pu, pj) = (
            f("realised_rate")?,
            f("cp_lo")?,
            f("cp_hi")?,
            f("jeffreys_lo")?,
            f("jeffreys_hi")?,
            f("implied_pd")?,
            f("p_binom_upper")?,
            f("p_jeffreys")?,
        );
        let (z, os) = (strs(df, path, "zone")?, strs(df, path, "outcome_source")?);
        let (lp, lpl, lph, lq, ra, ral, rah) = (
            f("lambda_p")?,
            f("lambda_p_lo")?,
            f("lambda_p_hi")?,
            f("lambda_q")?,
            f("ratio")?,
            f("ratio_lo")?,
            f("ratio_hi")?,
        );
        let nan = |v: Option<f64>| v.unwrap_or(f64::NAN);
        (0..df.height())
            .map(|i| {
                Ok(HistoryRow {
                    cohort: co[i].take().unwrap_or_default(),
                    grade: g[i].unwrap_or(0) as u32,
                    level: nan(lv[i]),
                    obligors: whole(ob[i]),
                    defaults: whole(d[i]),
                    withdrawn: w[i].map(|x| x.max(0) as u64),
                    realised_rate: nan(rr[i]),
                    cp_lo: nan(cl[i]),
                    cp_hi: nan(ch[i]),
                    jeffreys_lo: nan(jl[i]),
                    jeffreys_hi: nan(jh[i]),
                    implied_pd: pd[i],
                    p_binom_upper: pu[i],
                    p_jeffreys: pj[i],
                    zone: z[i].as_deref().map(|z| text_form(Some(z), "zone", path, i)).transpose()?,
                    lambda_p: nan(lp[i]),
                    lambda_p_lo: nan(lpl[i]),
                    lambda_p_hi: nan(lph[i]),
                    lambda_q: lq[i],
                    ratio: ra[i],
                    ratio_lo: ral[i],
                    ratio_hi: rah[i],
                    outcome_source: intern(os[i].as_deref().unwrap_or("")),
                })
            })
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::Zone;
    use crate::tables::testing::{refuses_a_missing_column, round_trip};

    fn bucket(zone: Option<Zone>) -> BucketRow {
        BucketRow {
            cohort: "2016-01-04".into(),
            horizon_years: 1,
            bucket: "grade 3".into(),
            level: 0.95,
            n: 120,
            defaults: 2,
            n_censored: 1,
            n_incomplete: 0,
            realised_rate: Some(2.0 / 119.0),
            rate_method: Some(crate::backtest::RateMethod::KaplanMeier),
            km_lo: Some(0.004),
            km_hi: Some(0.05),
            implied_pd: Some(0.031),
            cp_lo: Some(0.002),
            cp_hi: Some(0.06),
            jeffreys_lo: Some(0.003),
            jeffreys_hi: Some(0.055),
            wilson_lo: Some(0.004),
            wilson_hi: Some(0.058),
            p_binom_upper: Some(0.9),
            p_binom_lower: Some(0.2),
            p_jeffreys: Some(0.8),
            zone,
            zone_lower: Some(Zone::Yellow),
            rho: Some(0.21),
            p_vasicek_upper: Some(0.7),
            p_vasicek_lower: Some(0.4),
            vasicek_lo: Some(0.0),
            vasicek_hi: Some(0.12),
            zone_vasicek: zone,
            outcome_source: "entity_defaults",
        }
    }

    #[test]
    fn backtest_buckets_round_trip() {
        let rows = vec![
            BucketRecord { recovery: 0.4, row: bucket(Some(Zone::Green)) },
            BucketRecord { recovery: 0.25, row: BucketRow { realised_rate: None, zone: None, ..bucket(None) } },
        ];
        assert_eq!(round_trip(&rows), rows);
        refuses_a_missing_column(&rows);
    }

    #[test]
    fn hosmer_lemeshow_round_trips() {
        let rows = vec![HosmerLemeshowRecord {
            recovery: 0.4,
            row: HosmerLemeshowRow {
                cohort: "pooled".into(),
                horizon_years: 3,
                buckets: 7,
                statistic: Some(12.5),
                p_value: Some(0.05),
                note: None,
                n: 900,
                brier: Some(0.02),
                spiegelhalter_z: Some(-1.2),
                spiegelhalter_p: Some(0.23),
                hhi: Some(0.18),
            },
        }];
        assert_eq!(round_trip(&rows), rows);
        refuses_a_missing_column(&rows);
    }

    #[test]
    fn discrimination_and_verdicts_round_trip() {
        use crate::backtest::{Score, Status};
        let rows = vec![DiscriminationRecord {
            recovery: 0.4,
            row: DiscriminationRow {
                cohort: "all".into(),
                horizon_years: 1,
                score: Score::Grade,
                level: 0.95,
                n: 400,
                defaults: 7,
                auc: Some(0.81),
                auc_se: Some(0.05),
                auc_lo: Some(0.71),
                auc_hi: Some(0.91),
                gini: Some(0.62),
                p_no_power: Some(1e-9),
                p_vs_grade: None,
                auc_reference: Some(0.78),
                p_vs_reference: Some(0.6),
                note: None,
            },
        }];
        assert_eq!(round_trip(&rows), rows);
        refuses_a_missing_column(&rows);
        let v = vec![VerdictRow {
            family: "Hosmer-Lemeshow",
            reading: "forecasts and outcomes disagree",
            tests: 12,
            against: 2,
            strongly_against: 1,
            extreme_p: Some(1e-4),
            status: Status::Fail,
            note: Some("of the 2 rejecting tests, 2 have fewer defaults than forecast".into()),
            over_predicting: Some(2),
            under_predicting: Some(0),
        }];
        assert_eq!(round_trip(&v), v);
        refuses_a_missing_column(&v);
        let t = vec![TermStructureRecord {
            recovery: 0.4,
            row: TermStructureRow {
                bucket: "grade 5".into(),
                horizon_years: 3,
                level: 0.95,
                members: 300,
                defaults: 20,
                at_risk_at_horizon: 120,
                realised_rate: Some(0.11),
                rate_lo: Some(0.07),
                rate_hi: Some(0.16),
                implied_pd: Some(0.25),
                expected_defaults: Some(45.0),
                observed_to_expected: Some(20.0 / 45.0),
                p_upper: Some(0.999),
                p_lower: Some(0.001),
                zone: Some(Zone::Green),
                note: None,
            },
        }];
        assert_eq!(round_trip(&t), t);
        refuses_a_missing_column(&t);
        let m = vec![MigrationRow {
            cohort: "all".into(),
            from_grade: 3,
            to: "left coverage".into(),
            count: 4,
            from_total: 200,
            share: 0.02,
        }];
        assert_eq!(round_trip(&m), m);
        refuses_a_missing_column(&m);
    }

    #[test]
    fn risk_premia_round_trip() {
        let rows = vec![RiskPremiumRow {
            cohort: "pooled".into(),
            bucket: "grade 5".into(),
            horizon_years: 1,
            level: 0.95,
            recovery: 0.4,
            members: 160,
            exposure_years: 158.5,
            defaults: 3,
            lambda_p: Some(0.019),
            lambda_p_lo: Some(0.004),
            lambda_p_hi: Some(0.055),
            lambda_q: Some(0.04),
            ratio: Some(2.1),
            ratio_lo: Some(0.7),
            ratio_hi: Some(10.0),
            spread_bp: Some(250.0),
            spread_quotes: 160,
            el_spread_bp: Some(114.0),
            el_spread_lo_bp: Some(24.0),
            el_spread_hi_bp: Some(330.0),
            premium_spread_bp: Some(136.0),
            premium_spread_lo_bp: Some(-80.0),
            premium_spread_hi_bp: Some(226.0),
        }];
        assert_eq!(round_trip(&rows), rows);
        refuses_a_missing_column(&rows);
    }

    #[test]
    fn backtest_history_round_trips() {
        let rows = vec![HistoryRow {
            cohort: "2001".into(),
            grade: 4,
            level: 0.95,
            obligors: 800,
            defaults: 9,
            withdrawn: Some(30),
            realised_rate: 9.0 / 800.0,
            cp_lo: 0.005,
            cp_hi: 0.02,
            jeffreys_lo: 0.006,
            jeffreys_hi: 0.019,
            implied_pd: None,
            p_binom_upper: None,
            p_jeffreys: None,
            zone: None,
            lambda_p: 0.0113,
            lambda_p_lo: 0.005,
            lambda_p_hi: 0.0202,
            lambda_q: Some(0.03),
            ratio: Some(2.65),
            ratio_lo: Some(1.48),
            ratio_hi: Some(6.0),
            outcome_source: "cohort_history",
        }];
        assert_eq!(round_trip(&rows), rows);
        refuses_a_missing_column(&rows);
    }
}
