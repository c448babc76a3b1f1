//! The fits' own tables: `intensity_params` (one row per CIR fit of a CDS curve) and
//! `cds_bond_basis` (bond-implied against CDS-implied curve at each bond maturity). Both are
//! written, empty, when their fit is off, so every run folder holds the same tables.

use super::parquet::TableBuilder;
use super::readback::{bools, dates, fixed_labels, floats, ints, strs, text_form};
use super::{col, Column, Kind::*, Table};
use crate::error::Result;
use crate::text::RowStatus;
use chrono::NaiveDate;
use polars::prelude::DataFrame;
use std::path::Path;

/// One row of `intensity_params`: a CIR fit of one CDS curve.
#[derive(Debug, Clone, PartialEq)]
pub struct IntensityParamRow {
    pub date: NaiveDate,
    pub entity: String,
    pub currency: String,
    /// `free` or `fixed_kappa_sigma`.
    pub mode: &'static str,
    /// None when the fit failed.
    pub kappa: Option<f64>,
    pub theta: Option<f64>,
    pub sigma: Option<f64>,
    pub lambda0: Option<f64>,
    pub rmse_bp: Option<f64>,
    /// 2 kappa theta >= sigma^2.
    pub feller: Option<bool>,
    /// `ok`, `max_iterations` or `failed`.
    pub status: RowStatus,
    pub iterations: i64,
    pub evaluations: i64,
    pub detail: Option<String>,
    /// Scaled condition number of the day's fit (the parameters it was free to move).
    pub condition_number: Option<f64>,
    /// Scaled condition number of the pooled window fit of kappa and sigma (fixed mode).
    pub window_condition_number: Option<f64>,
    /// Standard errors (Gauss-Newton covariance): kappa and sigma from the pooled window fit in
    /// the fixed mode, else from the day's fit.
    pub se_kappa: Option<f64>,
    pub se_theta: Option<f64>,
    pub se_sigma: Option<f64>,
    pub se_lambda0: Option<f64>,
}

impl Table for IntensityParamRow {
    const NAME: &'static str = "intensity_params";
    const COLUMNS: &'static [Column] = &[
        col("date", Date),
        col("entity", Text),
        col("currency", Text),
        col("mode", Text),
        col("kappa", Float),
        col("theta", Float),
        col("sigma", Float),
        col("lambda0", Float),
        col("rmse_bp", Float),
        col("feller", Bool),
        col("status", Text),
        col("iterations", Int),
        col("evaluations", Int),
        col("detail", Text),
        col("condition_number", Float),
        col("window_condition_number", Float),
        col("se_kappa", Float),
        col("se_theta", Float),
        col("se_sigma", Float),
        col("se_lambda0", Float),
    ];

    fn metadata() -> Vec<(String, String)> {
        vec![(
            "hazardline.units".into(),
            "CIR d lambda = kappa (theta - lambda) dt + sigma sqrt(lambda) dW: kappa per year, theta and lambda0 per year, sigma per sqrt(year); rmse_bp over the curve's quotes in bp of running spread; feller: 2 kappa theta >= sigma^2; condition_number: sqrt(largest / smallest eigenvalue) of J'J with the Jacobian's columns scaled to unit length (the day's free parameters; window_condition_number the pooled kappa-sigma problem); se_*: square roots of the diagonal of s^2 (J'J)^-1, s^2 = sum r^2 / (m - n), in the parameters' units".into(),
        )]
    }

    fn frame(rows: &[Self]) -> Result<DataFrame> {
        TableBuilder::new()
            .dates("date", rows.iter().map(|r| Some(r.date)))
            .strings("entity", rows.iter().map(|r| Some(&r.entity)))
            .strings("currency", rows.iter().map(|r| Some(&r.currency)))
            .strings("mode", rows.iter().map(|r| Some(r.mode)))
            .floats("kappa", rows.iter().map(|r| r.kappa))
            .floats("theta", rows.iter().map(|r| r.theta))
            .floats("sigma", rows.iter().map(|r| r.sigma))
            .floats("lambda0", rows.iter().map(|r| r.lambda0))
            .floats("rmse_bp", rows.iter().map(|r| r.rmse_bp))
            .bools("feller", rows.iter().map(|r| r.feller))
            .strings("status", rows.iter().map(|r| Some(r.status.as_str())))
            .ints("iterations", rows.iter().map(|r| Some(r.iterations)))
            .ints("evaluations", rows.iter().map(|r| Some(r.evaluations)))
            .strings("detail", rows.iter().map(|r| r.detail.as_deref()))
            .floats("condition_number", rows.iter().map(|r| r.condition_number))
            .floats("window_condition_number", rows.iter().map(|r| r.window_condition_number))
            .floats("se_kappa", rows.iter().map(|r| r.se_kappa))
            .floats("se_theta", rows.iter().map(|r| r.se_theta))
            .floats("se_sigma", rows.iter().map(|r| r.se_sigma))
            .floats("se_lambda0", rows.iter().map(|r| r.se_lambda0))
            .finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let (d, mut e, mut c, mo, k, th, sg, l0, rm, fe, st, it, ev, mut de) = (
            dates(df, path, "date")?,
            strs(df, path, "entity")?,
            strs(df, path, "currency")?,
            fixed_labels(df, path, "mode", &["free", "fixed_kappa_sigma"])?,
            floats(df, path, "kappa")?,
            floats(df, path, "theta")?,
            floats(df, path, "sigma")?,
            floats(df, path, "lambda0")?,
            floats(df, path, "rmse_bp")?,
            bools(df, path, "feller")?,
            strs(df, path, "status")?,
            ints(df, path, "iterations")?,
            ints(df, path, "evaluations")?,
            strs(df, path, "detail")?,
        );
        let (cn, wcn, sk, sth, ssg, sl0) = (
            floats(df, path, "condition_number")?,
            floats(df, path, "window_condition_number")?,
            floats(df, path, "se_kappa")?,
            floats(df, path, "se_theta")?,
            floats(df, path, "se_sigma")?,
            floats(df, path, "se_lambda0")?,
        );
        (0..df.height())
            .map(|i| -> Result<IntensityParamRow> {
                Ok(IntensityParamRow {
                    date: d[i].unwrap_or_default(),
                    entity: e[i].take().unwrap_or_default(),
                    currency: c[i].take().unwrap_or_default(),
                    mode: mo[i],
                    kappa: k[i],
                    theta: th[i],
                    sigma: sg[i],
                    lambda0: l0[i],
                    rmse_bp: rm[i],
                    feller: fe[i],
                    status: text_form(st[i].as_deref(), "status", path, i)?,
                    iterations: it[i].unwrap_or(0),
                    evaluations: ev[i].unwrap_or(0),
                    detail: de[i].take(),
                    condition_number: cn[i],
                    window_condition_number: wcn[i],
                    se_kappa: sk[i],
                    se_theta: sth[i],
                    se_sigma: ssg[i],
                    se_lambda0: sl0[i],
                })
            })
            .collect()
    }
}

/// One row of `cds_bond_basis`: bond-implied against CDS-implied curve at one bond maturity.
#[derive(Debug, Clone, PartialEq)]
pub struct BasisRow {
    pub date: NaiveDate,
    pub entity: String,
    pub currency: String,
    pub maturity: NaiveDate,
    /// Act/365F years from date to maturity.
    pub time: f64,
    pub bond_average_hazard: f64,
    pub cds_average_hazard: f64,
    pub hazard_basis_bp: f64,
    pub bond_par_spread_bp: f64,
    pub cds_par_spread_bp: f64,
    pub basis_bp: f64,
}

impl Table for BasisRow {
    const NAME: &'static str = "cds_bond_basis";
    const COLUMNS: &'static [Column] = &[
        col("date", Date),
        col("entity", Text),
        col("currency", Text),
        col("maturity", Date),
        col("time", Float),
        col("bond_average_hazard", Float),
        col("cds_average_hazard", Float),
        col("hazard_basis_bp", Float),
        col("bond_par_spread_bp", Float),
        col("cds_par_spread_bp", Float),
        col("basis_bp", Float),
    ];

    fn metadata() -> Vec<(String, String)> {
        vec![(
            "hazardline.units".into(),
            "average hazard -ln S(T) / T per year; par spreads in bp of a CDS to maturity priced on the bond-implied and on the CDS-implied curve; basis_bp = cds - bond par spread, hazard_basis_bp = cds - bond average hazard in bp".into(),
        )]
    }

    fn frame(rows: &[Self]) -> Result<DataFrame> {
        TableBuilder::new()
            .dates("date", rows.iter().map(|r| Some(r.date)))
            .strings("entity", rows.iter().map(|r| Some(&r.entity)))
            .strings("currency", rows.iter().map(|r| Some(&r.currency)))
            .dates("maturity", rows.iter().map(|r| Some(r.maturity)))
            .floats("time", rows.iter().map(|r| Some(r.time)))
            .floats("bond_average_hazard", rows.iter().map(|r| Some(r.bond_average_hazard)))
            .floats("cds_average_hazard", rows.iter().map(|r| Some(r.cds_average_hazard)))
            .floats("hazard_basis_bp", rows.iter().map(|r| Some(r.hazard_basis_bp)))
            .floats("bond_par_spread_bp", rows.iter().map(|r| Some(r.bond_par_spread_bp)))
            .floats("cds_par_spread_bp", rows.iter().map(|r| Some(r.cds_par_spread_bp)))
            .floats("basis_bp", rows.iter().map(|r| Some(r.basis_bp)))
            .finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let (d, mut e, mut c, m, t, hb, hc, hbp, sb, sc, b) = (
            dates(df, path, "date")?,
            strs(df, path, "entity")?,
            strs(df, path, "currency")?,
            dates(df, path, "maturity")?,
            floats(df, path, "time")?,
            floats(df, path, "bond_average_hazard")?,
            floats(df, path, "cds_average_hazard")?,
            floats(df, path, "hazard_basis_bp")?,
            floats(df, path, "bond_par_spread_bp")?,
            floats(df, path, "cds_par_spread_bp")?,
            floats(df, path, "basis_bp")?,
        );
        let f = |v: &Vec<Option<f64>>, i: usize| v[i].unwrap_or(f64::NAN);
        Ok((0..df.height())
            .map(|i| BasisRow {
                date: d[i].unwrap_or_default(),
                entity: e[i].take().unwrap_or_default(),
                currency: c[i].take().unwrap_or_default(),
                maturity: m[i].unwrap_or_default(),
                time: f(&t, i),
                bond_average_hazard: f(&hb, i),
                cds_average_hazard: f(&hc, i),
                hazard_basis_bp: f(&hbp, i),
                bond_par_spread_bp: f(&sb, i),
                cds_par_spread_bp: f(&sc, i),
                basis_bp: f(&b, i),
            })
            .collect())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::tables::testing::{refuses_a_missing_column, round_trip};

    #[test]
    fn intensity_params_round_trip() {
        let d = NaiveDate::from_ymd_opt(2024, 5, 2).unwrap();
        let ok = IntensityParamRow {
            date: d,
            entity: "Alder Works".into(),
            currency: "EUR".into(),
            mode: "free",
            kappa: Some(0.4),
            theta: Some(0.02),
            sigma: Some(0.1),
            lambda0: Some(0.015),
            rmse_bp: Some(0.3),
            feller: Some(true),
            status: RowStatus::Ok,
            iterations: 12,
            evaluations: 40,
            detail: None,
            condition_number: Some(35.2),
            window_condition_number: None,
            se_kappa: Some(0.05),
            se_theta: Some(0.001),
            se_sigma: None,
            se_lambda0: Some(0.0004),
        };
        let failed = IntensityParamRow {
            mode: "fixed_kappa_sigma",
            kappa: None,
            theta: None,
            sigma: None,
            lambda0: None,
            rmse_bp: None,
            feller: None,
            status: RowStatus::Failed,
            detail: Some("no usable start".into()),
            condition_number: None,
            se_kappa: None,
            se_theta: None,
            se_lambda0: None,
            ..ok.clone()
        };
        let rows = vec![ok, failed];
        assert_eq!(round_trip(&rows), rows);
        refuses_a_missing_column(&rows);
    }

    #[test]
    fn cds_bond_basis_round_trips() {
        let d = NaiveDate::from_ymd_opt(2024, 5, 2).unwrap();
        let rows = vec![BasisRow {
            date: d,
            entity: "Alder Works".into(),
            currency: "USD".into(),
            maturity: d + chrono::Duration::days(1000),
            time: 2.74,
            bond_average_hazard: 0.021,
            cds_average_hazard: 0.019,
            hazard_basis_bp: -20.0,
            bond_par_spread_bp: 130.0,
            cds_par_spread_bp: 118.0,
            basis_bp: -12.0,
        }];
        assert_eq!(round_trip(&rows), rows);
        refuses_a_missing_column(&rows);
    }
}
