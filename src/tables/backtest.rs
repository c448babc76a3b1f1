//! The backtest's tables: `backtest_buckets` (implied against realised default rates per
//! cohort, horizon and bucket, every recovery scenario told apart by `recovery`),
//! `backtest_hosmer_lemeshow`, `risk_premia` and `backtest_history` (the cohort-history
//! comparison).

use super::parquet::TableBuilder;
use super::readback::{floats, intern, ints, strs, text_form};
use super::{col, Column, Kind::*, Table};
use crate::backtest::{BucketRow, HistoryRow, HosmerLemeshowRow, RiskPremiumRow};
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
        col("realised_rate", Float),
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
        col("outcome_source", Text),
    ];

    fn frame(rows: &[Self]) -> Result<DataFrame> {
        let rows: Vec<(f64, &BucketRow)> = rows.iter().map(|r| (r.recovery, &r.row)).collect();
        TableBuilder::new()
            .strings("cohort", rows.iter().map(|(_, b)| Some(&b.cohort)))
            .ints("horizon", rows.iter().map(|(_, b)| Some(b.horizon_years as i64)))
            .strings("bucket", rows.iter().map(|(_, b)| Some(&b.bucket)))
            .floats("level", rows.iter().map(|(_, b)| Some(b.level)))
            .floats("recovery", rows.iter().map(|(r, _)| Some(*r)))
            .ints("n", rows.iter().map(|(_, b)| Some(b.n as i64)))
            .ints("defaults", rows.iter().map(|(_, b)| Some(b.defaults as i64)))
            .ints("n_censored", rows.iter().map(|(_, b)| Some(b.n_censored as i64)))
            .floats("realised_rate", rows.iter().map(|(_, b)| b.realised_rate))
            .floats("implied_pd", rows.iter().map(|(_, b)| b.implied_pd))
            .floats("cp_lo", rows.iter().map(|(_, b)| b.cp_lo))
            .floats("cp_hi", rows.iter().map(|(_, b)| b.cp_hi))
            .floats("jeffreys_lo", rows.iter().map(|(_, b)| b.jeffreys_lo))
            .floats("jeffreys_hi", rows.iter().map(|(_, b)| b.jeffreys_hi))
            .floats("wilson_lo", rows.iter().map(|(_, b)| b.wilson_lo))
            .floats("wilson_hi", rows.iter().map(|(_, b)| b.wilson_hi))
            .floats("p_binom_upper", rows.iter().map(|(_, b)| b.p_binom_upper))
            .floats("p_binom_lower", rows.iter().map(|(_, b)| b.p_binom_lower))
            .floats("p_jeffreys", rows.iter().map(|(_, b)| b.p_jeffreys))
            .strings("zone", rows.iter().map(|(_, b)| b.zone.map(|z| z.as_str())))
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
        let (n, d, nc) = (ints(df, path, "n")?, ints(df, path, "defaults")?, ints(df, path, "n_censored")?);
        let (rr, pd, cl, ch, jl, jh, wl, wh, pu, pl, pj) = (
            f("realised_rate")?,
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
        let (z, os) = (strs(df, path, "zone")?, strs(df, path, "outcome_source")?);
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
                        realised_rate: rr[i],
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
                        zone: z[i].as_deref().map(|z| text_form(Some(z), "zone", path, i)).transpose()?,
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
                },
            })
            .collect())
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
        col("premium_spread_bp", Float),
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
            .floats("premium_spread_bp", rp.iter().map(|b| b.premium_spread_bp))
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
                premium_spread_bp: pr[i],
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
            realised_rate: Some(2.0 / 119.0),
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
            },
        }];
        assert_eq!(round_trip(&rows), rows);
        refuses_a_missing_column(&rows);
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
            premium_spread_bp: Some(136.0),
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
            outcome_source: "cohort_history",
        }];
        assert_eq!(round_trip(&rows), rows);
        refuses_a_missing_column(&rows);
    }
}
