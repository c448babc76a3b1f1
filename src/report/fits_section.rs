//! Section 3's subsections for the bond-implied curves and the CIR fit (only what ran): the
//! tables and figures of `hazard_curves` (source `bond`), `cds_bond_basis` and
//! `intensity_params`.

use super::charts;
use super::markdown::{pct, quantile, quantile_band};
use crate::calibrate::cir::CirFitSettings;
use crate::error::{Error, Result};
use crate::tables::manifest::write_text;
use crate::tables::manifest::RecordedSettings;
use crate::tables::HazardCurveRow;
use chrono::NaiveDate;
use std::collections::{BTreeMap, BTreeSet};
use std::fmt::Write as _;
use std::path::Path;

pub(super) fn median(v: &mut [f64]) -> f64 {
    v.sort_by(f64::total_cmp);
    quantile(v, 0.5)
}

/// The parameters of a CIR fit at a bound of the default box, as (parameter index: kappa 0,
/// theta 1, sigma 2, lambda0 3; side: 0 lower, 1 upper), within a relative 1e-9 of the bound.
fn params_at_bounds(p: &crate::tables::IntensityParamRow) -> Vec<(usize, usize)> {
    let b = CirFitSettings::default().bounds;
    let near = |x: f64, edge: f64| (x - edge).abs() <= 1e-9 * edge.abs().max(1e-12);
    let mut out = Vec::new();
    for (k, v, (lo, hi)) in
        [(0, p.kappa, b.kappa), (1, p.theta, b.theta), (2, p.sigma, b.sigma), (3, p.lambda0, b.lambda0)]
    {
        if let Some(x) = v {
            if near(x, lo) || x < lo {
                out.push((k, 0));
            } else if near(x, hi) || x > hi {
                out.push((k, 1));
            }
        }
    }
    out
}

/// Section 3's subsections for the bond-implied curves and the CIR fit (only what ran).
#[allow(clippy::too_many_arguments)]
pub(super) fn intensity_sections(
    w: &mut String,
    bond_hazard: &[HazardCurveRow],
    bond_res: &[&crate::tables::ResidualRow],
    basis: &[crate::tables::BasisRow],
    params: &[crate::tables::IntensityParamRow],
    settings: &RecordedSettings,
    charts_dir: &Path,
    figure: &mut usize,
    (hazard_table, residual_table): &(String, String),
    charted: &[String],
) -> Result<()> {
    let chart_err = Error::Chart;
    if !bond_hazard.is_empty() {
        let _ = writeln!(w, "### Bond-implied hazard curves\n");
        let _ = writeln!(
            w,
            "Hazard curves implied by each entity's fixed-coupon bond prices (recovery convention `{}`), one per (date, entity, currency); rows with source `bond` in `{hazard_table}`, bond residuals with method `bond_fit` in `{residual_table}` (market and model clean price per 100 face, residual in bp of yield).\n",
            settings.bond_recovery_convention.as_str()
        );
        let mut per: BTreeMap<
            (&str, &str),
            (BTreeSet<NaiveDate>, BTreeSet<&str>, BTreeSet<String>, Vec<f64>, Vec<f64>),
        > = BTreeMap::new();
        for h in bond_hazard {
            let e = per.entry((&*h.entity, &*h.currency)).or_default();
            e.0.insert(h.date);
            e.2.insert(h.detail.as_deref().and_then(|d| d.split(' ').next()).unwrap_or("").replace('_', "-"));
        }
        for r in bond_res {
            let e = per.entry((&*r.entity, &*r.currency)).or_default();
            e.1.insert(&*r.tenor_or_bond);
            e.3.push(r.model - r.market);
            e.4.push(r.residual_bp);
        }
        let rms = |v: &[f64]| (v.iter().map(|x| x * x).sum::<f64>() / v.len().max(1) as f64).sqrt();
        let _ = writeln!(w, "| entity | currency | curves | bonds | form | RMSE price (per 100) | RMSE yield (bp) | largest abs yield residual (bp) |\n| --- | --- | ---: | ---: | --- | ---: | ---: | ---: |");
        for ((e, c), (d, b, f, p, y)) in &per {
            let mx = y.iter().fold(0.0f64, |a, x| a.max(x.abs()));
            let _ = writeln!(
                w,
                "| {} | {} | {} | {} | {} | {:.2e} | {:.2e} | {mx:.2e} |",
                super::markdown::cell_text(e),
                super::markdown::cell_text(c),
                d.len(),
                b.len(),
                f.iter().cloned().collect::<Vec<_>>().join(", "),
                rms(p),
                rms(y)
            );
        }
        let _ = writeln!(w);
        if basis.is_empty() {
            let _ = writeln!(w, "No CDS curve was available on the bonds' dates, so no CDS-bond basis was computed.\n");
        } else {
            let _ = writeln!(w, "CDS-bond basis at the bond maturities (`tables/cds_bond_basis.parquet`): a CDS to each bond maturity priced on the bond-implied and on the CDS-implied curve; basis = CDS minus bond-implied par spread (negative when the bonds price the name as riskier than its CDS).\n");
            let mut per: BTreeMap<(&str, &str), (Vec<f64>, Vec<f64>)> = BTreeMap::new();
            for b in basis {
                let e = per.entry((b.entity.as_str(), b.currency.as_str())).or_default();
                e.0.push(b.basis_bp);
                e.1.push(b.hazard_basis_bp);
            }
            let _ = writeln!(w, "| entity | currency | points | mean basis (bp) | median | min | max | mean hazard basis (bp) |\n| --- | --- | ---: | ---: | ---: | ---: | ---: | ---: |");
            for ((e, c), (b, h)) in per.iter_mut() {
                let n = b.len() as f64;
                let mean = b.iter().sum::<f64>() / n;
                let (lo, hi) = b.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, z), x| (a.min(*x), z.max(*x)));
                let hm = h.iter().sum::<f64>() / n;
                let _ = writeln!(
                    w,
                    "| {} | {} | {} | {mean:.1} | {:.1} | {lo:.1} | {hi:.1} | {hm:.1} |",
                    super::markdown::cell_text(e),
                    super::markdown::cell_text(c),
                    b.len(),
                    median(b)
                );
            }
            let _ = writeln!(w);
        }
    }
    if !params.is_empty() {
        let _ = writeln!(w, "### CIR intensity fit\n");
        let _ = writeln!(w, "The CIR intensity d lambda = kappa (theta - lambda) dt + sigma sqrt(lambda) dW fitted to each bootstrapped CDS curve's quotes (`tables/intensity_params.parquet`; repriced quotes with method `cir` in `{residual_table}`). Medians over the fits that produced parameters; RMSE over each curve's quotes in bp of running spread.\n");
        let mut per: BTreeMap<(&str, &str), Vec<&crate::tables::IntensityParamRow>> = BTreeMap::new();
        for p in params {
            per.entry((p.entity.as_str(), p.currency.as_str())).or_default().push(p);
        }
        let _ = writeln!(w, "| entity | currency | fits | kappa | theta | sigma | lambda0 | median RMSE (bp) | largest RMSE (bp) | Feller holds | at a bound | status |\n| --- | --- | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | --- |");
        for ((e, c), v) in &per {
            let col = |f: &dyn Fn(&crate::tables::IntensityParamRow) -> Option<f64>| -> Vec<f64> {
                v.iter().filter_map(|p| f(p)).collect()
            };
            let (mut k, mut th, mut sg, mut l0, mut rm) =
                (col(&|p| p.kappa), col(&|p| p.theta), col(&|p| p.sigma), col(&|p| p.lambda0), col(&|p| p.rmse_bp));
            let mx = rm.iter().fold(0.0f64, |a, x| a.max(*x));
            let with = v.iter().filter(|p| p.feller.is_some()).count();
            let feller = v.iter().filter(|p| p.feller == Some(true)).count();
            let bound = v.iter().filter(|p| !params_at_bounds(p).is_empty()).count();
            let mut st: BTreeMap<&str, usize> = BTreeMap::new();
            for p in v {
                *st.entry(p.status.as_str()).or_default() += 1;
            }
            let st = st.iter().map(|(s, n)| format!("`{s}` {n}")).collect::<Vec<_>>().join(", ");
            let _ = writeln!(
                w,
                "| {} | {} | {} | {:.4} | {:.4} | {:.4} | {:.4} | {:.2} | {mx:.2} | {} | {bound} | {st} |",
                super::markdown::cell_text(e),
                super::markdown::cell_text(c),
                v.len(),
                median(&mut k),
                median(&mut th),
                median(&mut sg),
                median(&mut l0),
                median(&mut rm),
                pct(feller as f64 / with.max(1) as f64)
            );
        }
        let bound = params.iter().filter(|p| !params_at_bounds(p).is_empty()).count();
        let _ = writeln!(
            w,
            "\n{bound} of {} fits have a parameter at a bound of its box, counted from the values themselves in every mode (in `fixed_kappa_sigma` mode kappa and sigma come from the window's pooled fit, so the daily fit's `detail` column does not name them). The plain CIR has three shape parameters for a whole curve; a fit at a bound, or with an RMSE well above the quotes' bid-ask, says the model cannot take that curve's shape, and its parameters should not be read as estimates.\n",
            params.len()
        );
        let b = CirFitSettings::default().bounds;
        let _ = writeln!(
            w,
            "| parameter | box | fits at the lower bound | fits at the upper bound |\n| --- | --- | ---: | ---: |"
        );
        for (k, name, (lo, hi)) in
            [(0, "kappa", b.kappa), (1, "theta", b.theta), (2, "sigma", b.sigma), (3, "lambda0", b.lambda0)]
        {
            let at = |side: usize| params.iter().filter(|p| params_at_bounds(p).contains(&(k, side))).count();
            let _ = writeln!(w, "| {name} | [{lo}, {hi}] | {} | {} |", at(0), at(1));
        }
        let trivial = params.iter().filter(|p| p.feller == Some(true) && params_at_bounds(p).contains(&(2, 0))).count();
        let _ = writeln!(
            w,
            "\nThe Feller condition 2 kappa theta >= sigma^2 holds trivially when sigma sits at its floor: {trivial} of the fits where it holds have sigma at the floor.\n"
        );
        identification_table(w, &per);
        // RMSE through time per entity, over the universe band.
        let mut per_date: BTreeMap<NaiveDate, Vec<f64>> = BTreeMap::new();
        for p in params {
            if let Some(r) = p.rmse_bp {
                per_date.entry(p.date).or_default().push(r);
            }
        }
        // A 10%-90% band over two or three names says nothing about a universe: drawn only
        // with at least as many names as the stability review's universe rules need.
        let names = per.len();
        let min_names = crate::stability::StabilitySettings::default().universe_min_entities;
        let band = if names >= min_names { quantile_band(&mut per_date) } else { Vec::new() };
        let series: Vec<(String, Vec<(f64, f64)>)> = per
            .iter()
            .map(|((e, _), v)| {
                (
                    e.to_string(),
                    v.iter().filter_map(|p| Some((charts::decimal_year(p.date), p.rmse_bp?))).collect::<Vec<_>>(),
                )
            })
            .filter(|(_, v)| !v.is_empty())
            .collect();
        if !series.is_empty() {
            let svg = charts::history_with_band(
                "CIR fit RMSE through time",
                "RMSE (bp of running spread)",
                &series,
                &band,
                &super::markdown::colour_slots(charted, series.iter().map(|(e, _)| e.as_str())),
            )
            .map_err(chart_err)?;
            write_text(&charts_dir.join("cir-rmse-history.svg"), &svg)?;
            *figure += 1;
            let _ = writeln!(w, "![CIR fit RMSE through time](charts/cir-rmse-history.svg)\n");
            if band.is_empty() {
                let _ = writeln!(w, "*Figure {figure}. Root mean square repricing error of the CIR fit per curve date and entity ({names} fitted names: too few for a 10%-90% band, none is drawn).*\n", figure = *figure);
            } else {
                let _ = writeln!(w, "*Figure {figure}. Root mean square repricing error of the CIR fit per curve date and entity, over the 10%-90% range of the {names} fitted names (shaded) and their median (grey line).*\n", figure = *figure);
            }
        }
    }
    Ok(())
}

/// Identification per entity: the condition number of the day's fit and of the pooled window
/// fit, and each parameter's standard error relative to its value, as medians, with the count
/// of fits whose condition number is above 1e6 (a parameter the quotes hardly move).
fn identification_table(w: &mut String, per: &BTreeMap<(&str, &str), Vec<&crate::tables::IntensityParamRow>>) {
    const ILL: f64 = 1e6;
    let _ = writeln!(
        w,
        "How well the quotes pin the parameters down (medians per entity over the fits that produced parameters): the scaled condition number of each fit's Jacobian (columns scaled to unit length; the day's free parameters, and in `fixed_kappa_sigma` mode also the pooled window fit of kappa and sigma with every pooled day's theta and lambda0) and each parameter's standard error from the Gauss-Newton covariance s^2 (J'J)^-1 divided by its value. A condition number above 1e6 means some combination of parameters moves the quotes by less than a millionth of what the others do: those parameters are not identified by the day's curve, whatever their values. A relative standard error near or above 1 says the same of one parameter: its value cannot be told from zero (sigma at its floor shows this way). Per fit in `tables/intensity_params.parquet`.\n"
    );
    let _ = writeln!(
        w,
        "| entity | currency | condition number | fits above 1e6 | window condition number | se/kappa | se/theta | se/sigma | se/lambda0 |\n| --- | --- | ---: | ---: | ---: | ---: | ---: | ---: | ---: |"
    );
    let show = |v: Vec<f64>| -> String {
        let mut v: Vec<f64> = v.into_iter().filter(|x| !x.is_nan()).collect();
        if v.is_empty() {
            return "-".into();
        }
        let m = median(&mut v);
        if m.is_infinite() {
            "inf".into()
        } else if !(1e-3..1e4).contains(&m) {
            format!("{m:.2e}")
        } else {
            format!("{m:.3}")
        }
    };
    for ((e, c), v) in per {
        let rel = |se: fn(&crate::tables::IntensityParamRow) -> Option<f64>,
                   val: fn(&crate::tables::IntensityParamRow) -> Option<f64>|
         -> Vec<f64> { v.iter().filter_map(|p| Some(se(p)? / val(p)?.abs())).collect() };
        let cond: Vec<f64> = v.iter().filter_map(|p| p.condition_number).collect();
        let ill = cond.iter().filter(|&&c| !(c <= ILL)).count();
        let _ = writeln!(
            w,
            "| {} | {} | {} | {ill} of {} | {} | {} | {} | {} | {} |",
            super::markdown::cell_text(e),
            super::markdown::cell_text(c),
            show(cond.clone()),
            cond.len(),
            show(v.iter().filter_map(|p| p.window_condition_number).collect()),
            show(rel(|p| p.se_kappa, |p| p.kappa)),
            show(rel(|p| p.se_theta, |p| p.theta)),
            show(rel(|p| p.se_sigma, |p| p.sigma)),
            show(rel(|p| p.se_lambda0, |p| p.lambda0)),
        );
    }
    let _ = writeln!(w);
}

#[cfg(test)]
mod tests {
    use super::params_at_bounds;
    use crate::tables::IntensityParamRow;

    fn fit(kappa: f64, theta: f64, sigma: f64, lambda0: f64) -> IntensityParamRow {
        IntensityParamRow {
            date: chrono::NaiveDate::from_ymd_opt(2019, 1, 2).unwrap(),
            entity: "Alder".into(),
            currency: "USD".into(),
            mode: "fixed_kappa_sigma",
            kappa: Some(kappa),
            theta: Some(theta),
            sigma: Some(sigma),
            lambda0: Some(lambda0),
            rmse_bp: Some(1.0),
            feller: Some(true),
            status: crate::text::RowStatus::Ok,
            iterations: 5,
            evaluations: 9,
            detail: None,
            condition_number: Some(12.0),
            window_condition_number: Some(40.0),
            se_kappa: Some(0.01),
            se_theta: Some(0.001),
            se_sigma: Some(0.002),
            se_lambda0: Some(0.0005),
        }
    }

    /// Bounds are read from the values (the default box: kappa [1e-3, 10], theta [1e-6, 2],
    /// sigma [1e-4, 2], lambda0 [0, 2]), whatever the `detail` column says.
    #[test]
    fn parameters_at_a_bound_are_counted_from_the_values() {
        assert!(params_at_bounds(&fit(0.3, 0.02, 0.1, 0.01)).is_empty());
        assert_eq!(params_at_bounds(&fit(0.3, 0.02, 1e-4, 0.0)), [(2, 0), (3, 0)]);
        assert_eq!(params_at_bounds(&fit(10.0, 2.0, 0.1, 0.01)), [(0, 1), (1, 1)]);
        assert_eq!(params_at_bounds(&fit(0.3, 0.02, 1.0001e-4, 0.01)), [], "1e-4 relative above the floor is inside");
    }
}
