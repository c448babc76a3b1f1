//! The review sections of the report that read the backtest, risk-premium, stability and
//! residual-analytics tables back from a run folder.

use super::charts::{self, IntervalItem};
use crate::error::Result;
use crate::tables::readback::{bools, dates, floats, ints, read_frame, strs};
use chrono::NaiveDate;
use std::collections::{BTreeMap, BTreeSet};
use std::fmt::Write as _;
use std::path::Path;

pub(super) fn pct(x: f64) -> String {
    format!("{:.2}%", 100.0 * x)
}

pub(super) fn opt(x: Option<f64>, f: impl Fn(f64) -> String) -> String {
    x.filter(|v| v.is_finite()).map(f).unwrap_or_else(|| "-".into())
}

pub(super) fn sci(x: f64) -> String {
    if x == 0.0 {
        "0".into()
    } else if x.abs() >= 1e-3 {
        format!("{x:.4}")
    } else {
        format!("{x:.2e}")
    }
}

pub(super) fn save_chart(charts_dir: &Path, name: &str, svg: std::result::Result<String, String>) -> Result<bool> {
    match svg {
        Ok(text) => {
            std::fs::create_dir_all(charts_dir)
                .map_err(|e| crate::error::Error::Write { path: charts_dir.to_path_buf(), message: e.to_string() })?;
            crate::tables::manifest::write_text(&charts_dir.join(name), &text)?;
            Ok(true)
        }
        Err(e) => {
            tracing::warn!(chart = name, error = %e, "chart not drawn");
            Ok(false)
        }
    }
}

/// Grade number of a bucket label `grade N`, for ordering.
pub(super) fn bucket_order(b: &str) -> (u32, String) {
    b.strip_prefix("grade ").and_then(|g| g.parse().ok()).map_or((u32::MAX, b.to_string()), |g| (g, String::new()))
}

/// The fields of a `backtest_buckets` row the section reads outside its typed tables.
struct Bucket {
    cohort: String,
    horizon: i64,
    bucket: String,
    recovery: f64,
    realised: Option<f64>,
    implied: Option<f64>,
}

fn read_buckets(path: &Path) -> Result<Vec<Bucket>> {
    let df = read_frame(path)?;
    let (c, h, b, r, rr, ip) = (
        strs(&df, path, "cohort")?,
        ints(&df, path, "horizon")?,
        strs(&df, path, "bucket")?,
        floats(&df, path, "recovery")?,
        floats(&df, path, "realised_rate")?,
        floats(&df, path, "implied_pd")?,
    );
    Ok((0..df.height())
        .map(|i| Bucket {
            cohort: c[i].clone().unwrap_or_default(),
            horizon: h[i].unwrap_or(0),
            bucket: b[i].clone().unwrap_or_default(),
            recovery: r[i].unwrap_or(f64::NAN),
            realised: rr[i],
            implied: ip[i],
        })
        .collect())
}

struct Premium {
    cohort: String,
    bucket: String,
    horizon: i64,
    recovery: f64,
    members: i64,
    exposure: f64,
    defaults: i64,
    lambda_p: (Option<f64>, Option<f64>, Option<f64>),
    lambda_q: Option<f64>,
    ratio: (Option<f64>, Option<f64>, Option<f64>),
    spread: Option<f64>,
    el: (Option<f64>, Option<f64>, Option<f64>),
    premium: (Option<f64>, Option<f64>, Option<f64>),
}

fn read_premia(path: &Path) -> Result<Vec<Premium>> {
    let df = read_frame(path)?;
    let (c, b, h, r, m, e, d) = (
        strs(&df, path, "cohort")?,
        strs(&df, path, "bucket")?,
        ints(&df, path, "horizon")?,
        floats(&df, path, "recovery")?,
        ints(&df, path, "members")?,
        floats(&df, path, "exposure_years")?,
        ints(&df, path, "defaults")?,
    );
    let (lp, lpl, lph, lq) = (
        floats(&df, path, "lambda_p")?,
        floats(&df, path, "lambda_p_lo")?,
        floats(&df, path, "lambda_p_hi")?,
        floats(&df, path, "lambda_q")?,
    );
    let (ra, ral, rah) = (floats(&df, path, "ratio")?, floats(&df, path, "ratio_lo")?, floats(&df, path, "ratio_hi")?);
    let (sp, el, pr) =
        (floats(&df, path, "spread_bp")?, floats(&df, path, "el_spread_bp")?, floats(&df, path, "premium_spread_bp")?);
    let (ell, elh, prl, prh) = (
        floats(&df, path, "el_spread_lo_bp")?,
        floats(&df, path, "el_spread_hi_bp")?,
        floats(&df, path, "premium_spread_lo_bp")?,
        floats(&df, path, "premium_spread_hi_bp")?,
    );
    Ok((0..df.height())
        .map(|i| Premium {
            cohort: c[i].clone().unwrap_or_default(),
            bucket: b[i].clone().unwrap_or_default(),
            horizon: h[i].unwrap_or(0),
            recovery: r[i].unwrap_or(f64::NAN),
            members: m[i].unwrap_or(0),
            exposure: e[i].unwrap_or(0.0),
            defaults: d[i].unwrap_or(0),
            lambda_p: (lp[i], lpl[i], lph[i]),
            lambda_q: lq[i],
            ratio: (ra[i], ral[i], rah[i]),
            spread: sp[i],
            el: (el[i], ell[i], elh[i]),
            premium: (pr[i], prl[i], prh[i]),
        })
        .collect())
}

/// The backtest and risk-premium section. `base_recovery` is the run's recovery.
pub fn backtest_section(
    w: &mut String,
    tables: &Path,
    charts_dir: &Path,
    figure: &mut usize,
    number: usize,
    base_recovery: f64,
    enabled: bool,
    settings: &[(String, String)],
    input_end: Option<&str>,
) -> Result<()> {
    let _ = writeln!(w, "## {number}. Backtest and risk premia\n");
    let setting = |k: &str| settings.iter().find(|(n, _)| n == k).map(|(_, v)| v.as_str());
    // The outcome end as a date: the configured one, else the input's last quote date.
    let configured = setting("outcome_end").filter(|v| chrono::NaiveDate::parse_from_str(v, "%Y-%m-%d").is_ok());
    let outcome_end = match (configured, input_end) {
        (Some(d), _) => format!("{d}, configured"),
        (None, Some(d)) => format!("{d}, the last quote date of the input"),
        (None, None) => "the last quote date of the input".to_string(),
    };
    let (yellow, red) = (setting("zone_yellow").unwrap_or("0.05"), setting("zone_red").unwrap_or("0.001"));
    let survivor_policy = setting("censoring").is_some_and(|c| c.starts_with("count as survivor"));
    let bpath = tables.join("backtest_buckets.parquet");
    if !enabled || !bpath.exists() {
        let _ = writeln!(w, "The backtest did not run (no grades, defaults or cohort history were given, or `[backtest] enabled = false`).\n");
        return Ok(());
    }
    let buckets = read_buckets(&bpath)?;
    let premia = read_premia(&tables.join("risk_premia.parquet"))?;
    let history_path = tables.join("backtest_history.parquet");
    let history_df = read_frame(&history_path)?;
    if buckets.is_empty() && history_df.height() == 0 {
        let _ = writeln!(w, "Nothing to backtest: either no realised outcomes were given (the backtest needs a `defaults` table or a `cohort_history`), or no cohort had members (no curve within the look-back window of a cohort date).\n");
        return Ok(());
    }
    if buckets.is_empty() {
        let _ = writeln!(w, "No `defaults` table was given, so entity-level outcomes are unknown: realised rates come from the institution's `cohort_history` only, compared with the mean 1Y implied PD of the same grades.\n");
    }
    let same = |r: f64| (r - base_recovery).abs() < 1e-9;
    let base: Vec<&Bucket> = buckets.iter().filter(|b| same(b.recovery)).collect();
    let horizons: BTreeSet<i64> = base.iter().map(|b| b.horizon).collect();
    let cohorts: BTreeSet<&str> = base.iter().map(|b| b.cohort.as_str()).filter(|c| *c != "all").collect();
    let _ = writeln!(
        w,
        "Cohorts are formed on {} cohort dates ({}); a member is an entity not in default and in coverage at the cohort date, with a complete calibrated curve within the look-back window, its implied PD is 1 - S(h) from that curve, and its outcome is a default in (t, t + h], observed to the outcome end ({}) whether or not the entity is still quoted: the defaults table covers every entity. A member leaves observation early only when its coverage ends (the entities table's `coverage_end`); it is then censored, defaulters and survivors alike, and the realised rate of its bucket is the Kaplan-Meier estimate with a Greenwood interval (marked KM) rather than d / n. Realised outcomes come from the `defaults` table{}. Recovery {} is the base; the implied PDs under the sensitivity recoveries are at the end of the section. Every bucket, interval, AUC, term-structure row and ratio below can be recomputed from `tables/backtest_members.parquet`, one row per member, horizon and recovery; the cohort-history comparison comes from `cohort_history` and the migration matrices from the grades table.\n",
        cohorts.len(),
        cohorts.iter().copied().collect::<Vec<_>>().join(", "),
        outcome_end,
        if history_df.height() > 0 { " and, for the longer history, from the institution's `cohort_history`" } else { "" },
        pct(base_recovery)
    );
    let verdicts = super::verdicts_section::read_verdicts(tables)?;
    super::verdicts_section::verdict_table(w, &verdicts, yellow, red);
    let records = crate::tables::read_from::<crate::tables::BucketRecord>(&bpath)?;
    let base_records: Vec<&crate::tables::BucketRecord> = records.iter().filter(|b| same(b.recovery)).collect();
    if !base_records.is_empty() {
        super::verdicts_section::incomplete_cohorts(w, &base_records, configured.or(input_end));
    }
    for &h in &horizons {
        let mut rows: Vec<&&Bucket> = base.iter().filter(|b| b.horizon == h && b.cohort == "all").collect();
        rows.sort_by_key(|b| bucket_order(&b.bucket));
        let level = base_records.first().map_or(0.95, |b| b.row.level);
        let _ = writeln!(w, "### Implied against realised, {h}Y horizon, all cohorts pooled\n");
        let _ = writeln!(w, "| bucket | n | censored | defaults | realised | mean implied PD | Clopper-Pearson | Jeffreys | P[D >= d] | P[D <= d] | Jeffreys p | zone (PD too low) | zone (PD too high) |\n| --- | ---: | ---: | ---: | ---: | ---: | --- | --- | ---: | ---: | ---: | --- | --- |");
        let pooled_records = super::verdicts_section::pooled(&base_records, h as u32);
        for b in &pooled_records {
            let r = &b.row;
            let realised = match r.rate_method {
                Some(crate::backtest::RateMethod::KaplanMeier) if r.km_lo.is_some() => {
                    format!("{} KM [{}, {}]", opt(r.realised_rate, pct), opt(r.km_lo, pct), opt(r.km_hi, pct))
                }
                Some(crate::backtest::RateMethod::KaplanMeier) => format!("{} KM", opt(r.realised_rate, pct)),
                _ => opt(r.realised_rate, pct),
            };
            let _ = writeln!(
                w,
                "| {} | {} | {} | {} | {} | {} | [{}, {}] | [{}, {}] | {} | {} | {} | {} | {} |",
                r.bucket,
                r.n,
                r.n_censored,
                r.defaults,
                realised,
                opt(r.implied_pd, pct),
                opt(r.cp_lo, pct),
                opt(r.cp_hi, pct),
                opt(r.jeffreys_lo, pct),
                opt(r.jeffreys_hi, pct),
                opt(r.p_binom_upper, sci),
                opt(r.p_binom_lower, sci),
                opt(r.p_jeffreys, sci),
                r.zone.map_or("-", |z| z.as_str()),
                r.zone_lower.map_or("-", |z| z.as_str())
            );
        }
        let above = rows.iter().filter(|b| matches!((b.implied, b.realised), (Some(i), Some(r)) if i > r)).count();
        let _ = writeln!(w, "\nThe mean implied PD is above the realised rate in {above} of {} buckets (intervals at {level} two-sided). The zone \"PD too low\" is read from the upper-tail binomial p-value P[D >= d] (under-prediction, the risk finding); \"PD too high\" from the lower tail P[D <= d] (over-prediction, the premium): green at p >= {yellow}, yellow below it, red below {red}. The Jeffreys p is the Beta(d + 1/2, n - d + 1/2) cdf at the mean implied PD, small when the PD is too low.\n", rows.len());
        let items: Vec<IntervalItem> = pooled_records
            .iter()
            .map(|b| {
                // The Greenwood interval where the rate is Kaplan-Meier with a default; else
                // Clopper-Pearson.
                let km = b.row.rate_method == Some(crate::backtest::RateMethod::KaplanMeier) && b.row.km_lo.is_some();
                IntervalItem {
                    label: b.row.bucket.trim_start_matches("grade ").to_string(),
                    estimate: b.row.realised_rate,
                    lo: if km { b.row.km_lo } else { b.row.cp_lo },
                    hi: if km { b.row.km_hi } else { b.row.cp_hi },
                    reference: b.row.implied_pd,
                }
            })
            .collect();
        let name = format!("backtest-{h}y.svg");
        if save_chart(
            charts_dir,
            &name,
            charts::interval_chart(
                &format!("Realised {h}Y default rate (CP interval) vs mean implied PD, by grade"),
                "default rate",
                true,
                &items,
                None,
                ["realised", "implied PD"],
            ),
        )? {
            *figure += 1;
            let _ = writeln!(w, "![Backtest {h}Y](charts/{name})\n");
            let _ = writeln!(w, "*Figure {figure}. Realised {h}-year default rate per bucket with its Clopper-Pearson interval (the Greenwood interval where the rate is a Kaplan-Meier estimate; points and bars) against the mean implied PD (red bars), log scale; a zero rate is an open circle at the axis floor.*\n");
        }
        super::verdicts_section::one_factor_table(w, &pooled_records, h as u32, level);
    }
    // Hosmer-Lemeshow and the obligor-level scores.
    let hl_path = tables.join("backtest_hosmer_lemeshow.parquet");
    let hl = crate::tables::read_from::<crate::tables::HosmerLemeshowRecord>(&hl_path)?;
    let _ = writeln!(w, "### Calibration across buckets and obligors\n\nHosmer-Lemeshow across buckets (forecasts given, not fitted: k degrees of freedom for k buckets; the chi-square approximation is poor where a bucket expects under about one default, as the best grades do per cohort year); Spiegelhalter's (1986) z of the obligor-level forecasts (two-sided p), the Brier score, and the Herfindahl-Hirschman index of the members over buckets (1 / buckets when spread evenly):\n\n| cohort | horizon | n | buckets | HL statistic | HL p-value | Brier | Spiegelhalter z | p-value | HHI | note |\n| --- | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | --- |");
    for x in hl.iter().filter(|x| same(x.recovery)) {
        let r = &x.row;
        let _ = writeln!(
            w,
            "| {} | {}Y | {} | {} | {} | {} | {} | {} | {} | {} | {} |",
            r.cohort,
            r.horizon_years,
            r.n,
            r.buckets,
            opt(r.statistic, |v| format!("{v:.3}")),
            opt(r.p_value, sci),
            opt(r.brier, |v| format!("{v:.4}")),
            opt(r.spiegelhalter_z, |v| format!("{v:.3}")),
            opt(r.spiegelhalter_p, sci),
            opt(r.hhi, |v| format!("{v:.3}")),
            r.note.as_deref().unwrap_or("")
        );
    }
    let _ = writeln!(w);
    super::verdicts_section::term_structure_section(w, tables, charts_dir, figure, &same)?;
    super::verdicts_section::migration_section(w, tables, charts_dir, figure)?;
    super::verdicts_section::discrimination_section(w, tables, charts_dir, figure, &same, survivor_policy)?;

    // Cohort history and the long-history premium.
    if history_df.height() > 0 {
        let history = crate::tables::read_from::<crate::backtest::HistoryRow>(&history_path)?;
        let _ = writeln!(w, "### Against the institution's cohort history\n\nRealised one-year rates from `cohort_history` (obligors and defaults summed over its years), against the mean 1Y implied PD of the same grade over the quoted period. The long-history premium sets the quoted period's pricing intensity lambda_Q (1Y windows, as in the risk-premium table below) against the historical intensity of the cohort history, -ln(1 - d / n) per year, whose interval carries the Clopper-Pearson bounds through the same map. The two come from different periods: the cohort history covers its own years, the pricing intensity only the quoted period, so the ratio mixes a long-run default experience with one period's prices.\n\n| grade | obligors (summed over the years) | defaults | realised | Clopper-Pearson | mean implied PD | P[D >= d] | zone | lambda_P (history) | interval | lambda_Q (quoted period) | Q/P | interval |\n| ---: | ---: | ---: | ---: | --- | ---: | ---: | --- | ---: | --- | ---: | ---: | --- |");
        for r in history.iter().filter(|r| r.cohort == "all") {
            let _ = writeln!(
                w,
                "| {} | {} | {} | {} | [{}, {}] | {} | {} | {} | {} | [{}, {}] | {} | {} | [{}, {}] |",
                r.grade,
                r.obligors,
                r.defaults,
                pct(r.realised_rate),
                pct(r.cp_lo),
                pct(r.cp_hi),
                opt(r.implied_pd, pct),
                opt(r.p_binom_upper, sci),
                r.zone.map_or("-", |z| z.as_str()),
                pct(r.lambda_p),
                pct(r.lambda_p_lo),
                opt(Some(r.lambda_p_hi), pct),
                opt(r.lambda_q, pct),
                opt(r.ratio, |v| format!("{v:.2}")),
                opt(r.ratio_lo, |v| format!("{v:.2}")),
                opt(r.ratio_hi, |v| format!("{v:.2}"))
            );
        }
        let _ = writeln!(w);
    }

    // Risk premia.
    let _ = writeln!(w, "### Risk premium: pricing against historical intensity\n");
    let _ = writeln!(w, "The historical intensity is defaults per exposure year (exposure from the cohort date to default, the end of coverage or the horizon end; incomplete cohorts are left out) with the exact Garwood (1936) Poisson interval; the pricing intensity is the calibrated hazard integrated over the same windows, per exposure year. The ratio's interval carries the Poisson uncertainty of the historical side only; with no default its upper end is unbounded (`-`). The expected-loss spread is lambda_P (1 - R), its interval from lambda_P's; the rest of the quoted spread at the matching tenor is risk and liquidity premium, its interval the quoted spread less the expected-loss interval.\n");
    for &h in &horizons {
        let mut rows: Vec<&Premium> =
            premia.iter().filter(|p| p.horizon == h && p.cohort == "all" && same(p.recovery)).collect();
        rows.sort_by_key(|p| bucket_order(&p.bucket));
        let _ = writeln!(w, "{h}Y horizon:\n\n| bucket | members | exposure years | defaults | lambda_P | interval | lambda_Q | Q/P | interval | quoted spread bp | expected-loss bp | interval | premium bp | interval |\n| --- | ---: | ---: | ---: | ---: | --- | ---: | ---: | --- | ---: | ---: | --- | ---: | --- |");
        for p in &rows {
            let _ = writeln!(
                w,
                "| {} | {} | {:.1} | {} | {} | [{}, {}] | {} | {} | [{}, {}] | {} | {} | [{}, {}] | {} | [{}, {}] |",
                p.bucket,
                p.members,
                p.exposure,
                p.defaults,
                opt(p.lambda_p.0, pct),
                opt(p.lambda_p.1, pct),
                opt(p.lambda_p.2, pct),
                opt(p.lambda_q, pct),
                opt(p.ratio.0, |v| format!("{v:.2}")),
                opt(p.ratio.1, |v| format!("{v:.2}")),
                opt(p.ratio.2, |v| format!("{v:.2}")),
                opt(p.spread, |v| format!("{v:.1}")),
                opt(p.el.0, |v| format!("{v:.1}")),
                opt(p.el.1, |v| format!("{v:.1}")),
                opt(p.el.2, |v| format!("{v:.1}")),
                opt(p.premium.0, |v| format!("{v:.1}")),
                opt(p.premium.1, |v| format!("{v:.1}")),
                opt(p.premium.2, |v| format!("{v:.1}"))
            );
        }
        let _ = writeln!(w);
        let items: Vec<IntervalItem> = rows
            .iter()
            .map(|p| IntervalItem {
                label: p.bucket.trim_start_matches("grade ").to_string(),
                estimate: p.ratio.0,
                lo: p.ratio.1,
                hi: p.ratio.2,
                reference: None,
            })
            .collect();
        let name = format!("risk-premium-{h}y.svg");
        if save_chart(
            charts_dir,
            &name,
            charts::interval_chart(
                &format!("Pricing / historical intensity by grade, {h}Y windows"),
                "Q/P ratio",
                true,
                &items,
                Some(1.0),
                ["Q/P", ""],
            ),
        )? {
            *figure += 1;
            let _ = writeln!(w, "![Risk premium {h}Y](charts/{name})\n");
            let _ = writeln!(w, "*Figure {figure}. Ratio of pricing to historical intensity per bucket with its interval (log scale, line at 1); buckets without a default have no point estimate and an open upper end.*\n");
        }
        // Through time.
        type Whisker = (f64, Option<f64>, Option<f64>);
        let mut through: BTreeMap<String, (Vec<(f64, f64)>, Vec<Whisker>)> = BTreeMap::new();
        for p in premia.iter().filter(|p| p.horizon == h && p.cohort != "all" && same(p.recovery)) {
            if let (Some(r), Ok(y)) = (p.ratio.0, p.cohort.parse::<i32>()) {
                let slot = through.entry(p.bucket.clone()).or_default();
                slot.0.push((y as f64, r));
                slot.1.push((y as f64, p.ratio.1, p.ratio.2));
            }
        }
        if !through.is_empty() {
            let mut rows: Vec<(String, (Vec<(f64, f64)>, Vec<Whisker>))> = through.into_iter().collect();
            rows.sort_by_key(|s| bucket_order(&s.0));
            let series: Vec<(String, Vec<(f64, f64)>)> =
                rows.iter().map(|(b, (p, _))| (b.clone(), p.clone())).collect();
            let intervals: Vec<Vec<Whisker>> = rows.into_iter().map(|(_, (_, i))| i).collect();
            let name = format!("risk-premium-through-time-{h}y.svg");
            if save_chart(
                charts_dir,
                &name,
                charts::multi_line_chart_log_with_intervals(
                    &format!("Q/P ratio per cohort year, {h}Y"),
                    "Q/P ratio",
                    &series,
                    &intervals,
                    &[(1.0, "1")],
                ),
            )? {
                *figure += 1;
                let _ = writeln!(w, "![Risk premium through time](charts/{name})\n");
                let _ = writeln!(w, "*Figure {figure}. Q/P ratio per bucket and cohort year with its interval (whiskers, beside each point; log scale, line at 1); cohorts without a default have no ratio and are left out.*\n");
            }
        }
    }
    // Recovery sensitivity.
    let recoveries: BTreeSet<u64> = premia.iter().map(|p| (p.recovery * 1e6).round() as u64).collect();
    if recoveries.len() > 1 {
        let recs: Vec<f64> = recoveries.iter().map(|r| *r as f64 / 1e6).collect();
        let h = horizons.iter().next().copied().unwrap_or(1);
        let _ = writeln!(w, "### Recovery sensitivity ({h}Y)\n\nThe curves the cohorts use are re-bootstrapped with each recovery; the implied PD scales roughly with 1 / (1 - R), so part of any premium is an artefact of the recovery assumption.\n");
        let mut head = String::from("| bucket |");
        let mut sep = String::from("| --- |");
        for r in &recs {
            let _ = write!(head, " implied PD, R = {} | Q/P, R = {} |", pct(*r), pct(*r));
            sep.push_str(" ---: | ---: |");
        }
        let _ = writeln!(w, "{head}\n{sep}");
        let mut names: Vec<&str> = premia
            .iter()
            .filter(|p| p.cohort == "all" && p.horizon == h)
            .map(|p| p.bucket.as_str())
            .collect::<BTreeSet<_>>()
            .into_iter()
            .collect();
        names.sort_by_key(|b| bucket_order(b));
        for b in names {
            let mut line = format!("| {b} |");
            for r in &recs {
                let pd = buckets
                    .iter()
                    .find(|x| x.cohort == "all" && x.horizon == h && x.bucket == b && (x.recovery - r).abs() < 1e-9)
                    .and_then(|x| x.implied);
                let ratio = premia
                    .iter()
                    .find(|x| x.cohort == "all" && x.horizon == h && x.bucket == b && (x.recovery - r).abs() < 1e-9)
                    .and_then(|x| x.ratio.0);
                let _ = write!(line, " {} | {} |", opt(pd, pct), opt(ratio, |v| format!("{v:.2}")));
            }
            let _ = writeln!(w, "{line}");
        }
        let _ = writeln!(w);
    }
    Ok(())
}

/// The parameter-stability section.
pub fn stability_section(
    w: &mut String,
    tables: &Path,
    charts_dir: &Path,
    figure: &mut usize,
    number: usize,
    stability: &[(String, String)],
) -> Result<()> {
    let _ = writeln!(w, "## {number}. Parameter stability\n");
    let path = tables.join("stability.parquet");
    let df = read_frame(&path)?;
    if df.height() == 0 {
        let _ = writeln!(w, "No parameter series were available.\n");
        return Ok(());
    }
    let (period, series, scope, key, n, mean, median, mc) = (
        strs(&df, &path, "period")?,
        strs(&df, &path, "series")?,
        strs(&df, &path, "scope")?,
        strs(&df, &path, "key")?,
        ints(&df, &path, "n")?,
        floats(&df, &path, "mean")?,
        floats(&df, &path, "median")?,
        floats(&df, &path, "mean_change")?,
    );
    let periods: BTreeSet<String> = period.iter().flatten().cloned().collect();
    let _ = writeln!(w, "Each series is summarised per review period ({} periods, {} to {}) per entity, per grade and over the universe (`tables/stability.parquet`); every breach of a threshold below is a flag in section 6 pointing to its entity, series and period.\n", periods.len(), periods.iter().next().cloned().unwrap_or_default(), periods.iter().last().cloned().unwrap_or_default());
    // Universe table for the implied PD and the 5Y hazard (the CIR parameters are in section 3).
    let _ = writeln!(
        w,
        "| period | series | names | mean | median | change of mean |\n| --- | --- | ---: | ---: | ---: | ---: |"
    );
    for i in 0..df.height() {
        let s = series[i].as_deref().unwrap_or("");
        if scope[i].as_deref() == Some("universe") && (s == "pd_1y" || s == "hazard_5y") {
            let _ = writeln!(
                w,
                "| {} | {s} | {} | {} | {} | {} |",
                period[i].as_deref().unwrap_or(""),
                n[i].unwrap_or(0),
                opt(mean[i], sci),
                opt(median[i], sci),
                opt(mc[i], pct)
            );
        }
    }
    let _ = writeln!(w);
    // Heat map of the change of the mean implied PD by grade.
    let mut grid: BTreeMap<u32, BTreeMap<String, f64>> = BTreeMap::new();
    for i in 0..df.height() {
        if scope[i].as_deref() == Some("grade") && series[i].as_deref() == Some("pd_1y") {
            if let (Some(g), Some(p), Some(c)) =
                (key[i].as_deref().and_then(|k| k.parse::<u32>().ok()), &period[i], mc[i])
            {
                grid.entry(g).or_default().insert(p.clone(), c);
            }
        }
    }
    if !grid.is_empty() {
        let cols: Vec<String> = periods.iter().cloned().collect();
        let rows: Vec<String> = grid.keys().map(|g| format!("grade {g}")).collect();
        let values: Vec<Vec<Option<f64>>> =
            grid.values().map(|m| cols.iter().map(|c| m.get(c).copied()).collect()).collect();
        if save_chart(
            charts_dir,
            "stability-heat-map.svg",
            charts::heat_map(
                "Change of the mean 1Y implied PD on the previous period, by grade",
                &rows,
                &cols,
                &values,
            ),
        )? {
            *figure += 1;
            let _ = writeln!(w, "![Period-on-period change by grade](charts/stability-heat-map.svg)\n");
            let _ = writeln!(w, "*Figure {figure}. Relative change of the grade's mean 1Y implied PD on the previous period (red up, blue down, grey without a previous period).*\n");
        }
    }
    // PSI.
    let ppath = tables.join("stability_psi.parquet");
    let pdf = read_frame(&ppath)?;
    let (ps, pp, prev, np, nc, psi) = (
        strs(&pdf, &ppath, "series")?,
        strs(&pdf, &ppath, "period")?,
        strs(&pdf, &ppath, "previous_period")?,
        ints(&pdf, &ppath, "n_previous")?,
        ints(&pdf, &ppath, "n_current")?,
        floats(&pdf, &ppath, "psi")?,
    );
    if pdf.height() > 0 {
        let _ = writeln!(w, "Population stability index of the cross-sectional implied-PD distribution against the previous period and against the review's first period (a fixed reference, which a slow drift cannot hide from):\n\n| series | period | against | names before | names now | PSI | reading |\n| --- | --- | --- | ---: | ---: | ---: | --- |");
        // Per (series, period), the row against the latest earlier period is the
        // period-on-period one; an older reference is the review's first period.
        let mut latest: BTreeMap<(String, String), String> = BTreeMap::new();
        for i in 0..pdf.height() {
            let key = (ps[i].clone().unwrap_or_default(), pp[i].clone().unwrap_or_default());
            let p = prev[i].clone().unwrap_or_default();
            let slot = latest.entry(key).or_default();
            if p > *slot {
                *slot = p;
            }
        }
        let mut points = Vec::new();
        let mut fixed_points = Vec::new();
        for i in 0..pdf.height() {
            let key = (ps[i].clone().unwrap_or_default(), pp[i].clone().unwrap_or_default());
            let period_on_period = latest.get(&key) == prev[i].as_ref();
            let reading = match psi[i] {
                Some(v) if v > 0.25 => "shift (red)",
                Some(v) if v > 0.10 => "moderate (amber)",
                Some(_) => "stable",
                None => "too few names",
            };
            let _ = writeln!(
                w,
                "| {} | {} | {} | {} | {} | {} | {reading} |",
                ps[i].as_deref().unwrap_or(""),
                pp[i].as_deref().unwrap_or(""),
                prev[i].as_deref().unwrap_or(""),
                np[i].unwrap_or(0),
                nc[i].unwrap_or(0),
                opt(psi[i], |v| format!("{v:.4}"))
            );
            if let (Some(v), Some(p)) = (psi[i], pp[i].as_deref()) {
                if let Some(x) = period_midpoint(p) {
                    if period_on_period {
                        points.push((x, v));
                    } else {
                        fixed_points.push((x, v));
                    }
                }
            }
        }
        let _ = writeln!(w);
        if !points.is_empty()
            && save_chart(
                charts_dir,
                "psi.svg",
                charts::multi_line_chart(
                    "PSI of the 1Y implied PD",
                    "PSI",
                    &[
                        ("against the previous period".to_string(), points),
                        ("against the first period".to_string(), fixed_points),
                    ],
                    &[(0.10, "0.10"), (0.25, "0.25")],
                ),
            )?
        {
            *figure += 1;
            let _ = writeln!(w, "![PSI through time](charts/psi.svg)\n");
            let _ = writeln!(w, "*Figure {figure}. PSI per review period against the previous one and against the review's first period, with the 0.10 and 0.25 thresholds.*\n");
        }
    }
    // Breaks.
    let kpath = tables.join("stability_breaks.parquet");
    let kdf = read_frame(&kpath)?;
    let (ke, ks, kw, kst, kt, kp, kb) = (
        strs(&kdf, &kpath, "entity")?,
        strs(&kdf, &kpath, "series")?,
        strs(&kdf, &kpath, "window")?,
        strs(&kdf, &kpath, "status")?,
        strs(&kdf, &kpath, "target")?,
        floats(&kdf, &kpath, "p_value")?,
        dates(&kdf, &kpath, "break_date")?,
    );
    let tested: Vec<usize> = (0..kdf.height()).filter(|&i| kst[i].as_deref() == Some("tested")).collect();
    let short = kst.iter().filter(|s| s.as_deref() == Some("too_short")).count();
    let on_changes = tested.iter().filter(|&&i| kt[i].as_deref() == Some("daily_changes")).count();
    let level = stability
        .iter()
        .find(|(k, _)| k == "cusum_level")
        .map(|(_, v)| v.split(' ').next().unwrap_or("5%").to_string())
        .unwrap_or_else(|| "5%".into());
    let alpha: f64 = level.trim_end_matches('%').parse::<f64>().map(|v| v / 100.0).unwrap_or(0.05);
    let mut rejected: Vec<usize> = tested.iter().copied().filter(|&i| kp[i].is_some_and(|p| p < alpha)).collect();
    rejected.sort_by(|&a, &b| kp[a].unwrap_or(1.0).total_cmp(&kp[b].unwrap_or(1.0)));
    let red = rejected.iter().filter(|&&i| kp[i].is_some_and(|p| p < 0.01)).count();
    let target = stability.iter().find(|(k, _)| k == "cusum_target").map_or("auto", |(_, v)| v.as_str());
    let why = match target {
        "levels" => "all on the levels, as the pipeline file sets".to_string(),
        "daily_changes" => "all on the daily changes, as the pipeline file sets".to_string(),
        _ => format!("{on_changes} of them on daily changes because the Dickey-Fuller test could not reject a random walk in the levels and the changes were not over-differenced"),
    };
    let _ = writeln!(
        w,
        "Structural breaks: {} tests of a constant mean on entity-period windows (the CUSUM of deviations from the mean scaled by the series' long-run standard deviation, so that a persistent series is not read as a break; see the method notes); {why}. {} rejected at {level} ({red} at 1%), against {:.1} expected by chance if no series had a break{}. {short} windows had too few values to test: a series that is a step function (kappa and sigma in the CIR fit's `fixed_kappa_sigma` mode, one estimate per window of curve dates) is tested on its steps, one value per window, not date by date.\n",
        tested.len(),
        rejected.len(),
        alpha * tested.len() as f64,
        if rejected.is_empty() { "" } else { " (the smallest p-values below, all in `tables/stability_breaks.parquet`)" }
    );
    if !rejected.is_empty() {
        let _ = writeln!(w, "| entity | series | window | tested on | p-value | estimated break |\n| --- | --- | --- | --- | ---: | --- |");
        for &i in rejected.iter().take(15) {
            let p = kp[i].unwrap_or(f64::NAN);
            let _ = writeln!(
                w,
                "| {} | {} | {} | {} | {} | {} |",
                super::markdown::cell_text(ke[i].as_deref().unwrap_or("")),
                super::markdown::cell_text(ks[i].as_deref().unwrap_or("")),
                kw[i].as_deref().unwrap_or(""),
                if kt[i].as_deref() == Some("daily_changes") { "daily changes" } else { "levels" },
                if p < 1e-3 { format!("{p:.2e}") } else { format!("{p:.4}") },
                kb[i].map(|d| d.to_string()).unwrap_or_default()
            );
        }
        let _ = writeln!(w);
    }
    Ok(())
}

/// Decimal year of a period label's middle (`2024Q1`, `2024-03`, `2024H1`, `2024`).
fn period_midpoint(p: &str) -> Option<f64> {
    let year: f64 = p.get(..4)?.parse().ok()?;
    let rest = &p[4..];
    Some(if let Some(q) = rest.strip_prefix('Q') {
        year + (q.parse::<f64>().ok()? - 0.5) / 4.0
    } else if let Some(h) = rest.strip_prefix('H') {
        year + (h.parse::<f64>().ok()? - 0.5) / 2.0
    } else if let Some(m) = rest.strip_prefix('-') {
        year + (m.parse::<f64>().ok()? - 0.5) / 12.0
    } else {
        year + 0.5
    })
}

/// Residual analytics: repricing share, per-tenor distribution, worst residuals.
pub fn residual_section(w: &mut String, tables: &Path, charts_dir: &Path, figure: &mut usize) -> Result<()> {
    let rpath = tables.join("residual_repricing.parquet");
    let rdf = read_frame(&rpath)?;
    let _ = writeln!(w, "### Residual analytics\n");
    let (m, c, r, s, tol) = (
        strs(&rdf, &rpath, "method")?,
        ints(&rdf, &rpath, "curves")?,
        ints(&rdf, &rpath, "repricing")?,
        floats(&rdf, &rpath, "share")?,
        floats(&rdf, &rpath, "tolerance_bp")?,
    );
    let _ = writeln!(
        w,
        "| method | curves | within tolerance | share | tolerance bp |\n| --- | ---: | ---: | ---: | ---: |"
    );
    for i in 0..rdf.height() {
        let _ = writeln!(
            w,
            "| {} | {} | {} | {} | {} |",
            m[i].as_deref().unwrap_or(""),
            c[i].unwrap_or(0),
            r[i].unwrap_or(0),
            opt(s[i], pct),
            opt(tol[i], |v| if v >= 1e-3 { format!("{v}") } else { format!("{v:e}") })
        );
    }
    let tpath = tables.join("residual_tenors.parquet");
    let tdf = read_frame(&tpath)?;
    let (tm, tt, tn, a01, a05, a50, a95, a99) = (
        strs(&tdf, &tpath, "method")?,
        strs(&tdf, &tpath, "tenor")?,
        ints(&tdf, &tpath, "n")?,
        floats(&tdf, &tpath, "abs_q01")?,
        floats(&tdf, &tpath, "abs_q05")?,
        floats(&tdf, &tpath, "abs_q50")?,
        floats(&tdf, &tpath, "abs_q95")?,
        floats(&tdf, &tpath, "abs_q99")?,
    );
    let _ = writeln!(w, "\nDistribution of |residual| (bp) per method and tenor (`tables/residual_tenors.parquet` also has the signed quantiles; `tables/residual_curves.parquet` the RMSE and largest residual per curve):\n\n| method | tenor | quotes | 5% | median | 95% | 99% |\n| --- | --- | ---: | ---: | ---: | ---: | ---: |");
    let mut boot = Vec::new();
    // Per method, tenors in maturity order (6M, 1Y, 2Y, ..., 10Y), then bonds by identifier.
    let mut order: Vec<usize> = (0..tdf.height()).collect();
    order.sort_by_cached_key(|&i| {
        let tenor = tt[i].as_deref().unwrap_or("");
        let months = tenor.parse::<crate::time::Tenor>().map_or(u32::MAX, |t| t.months());
        (tm[i].clone(), months, tenor.to_string())
    });
    // Rows that are bonds (no tenor) can run to hundreds: per method, the main text shows the
    // ten with the largest 99% quantile and says how many more the table holds.
    const BOND_ROWS_SHOWN: usize = 10;
    let mut bond_rows: BTreeMap<String, Vec<usize>> = BTreeMap::new();
    for &i in &order {
        if tt[i].as_deref().is_some_and(|t| t.parse::<crate::time::Tenor>().is_err()) {
            bond_rows.entry(tm[i].clone().unwrap_or_default()).or_default().push(i);
        }
    }
    let mut hidden: BTreeMap<String, usize> = BTreeMap::new();
    for (method, rows) in bond_rows.iter_mut() {
        rows.sort_by(|&a, &b| a99[b].unwrap_or(f64::NAN).total_cmp(&a99[a].unwrap_or(f64::NAN)));
        if rows.len() > BOND_ROWS_SHOWN {
            hidden.insert(method.clone(), rows.len() - BOND_ROWS_SHOWN);
        }
        rows.truncate(BOND_ROWS_SHOWN);
    }
    let shown: BTreeSet<usize> = bond_rows.values().flatten().copied().collect();
    order.retain(|&i| tt[i].as_deref().is_some_and(|t| t.parse::<crate::time::Tenor>().is_ok()) || shown.contains(&i));
    // The shown bonds, worst first.
    order.sort_by_cached_key(|&i| {
        let tenor = tt[i].as_deref().unwrap_or("");
        let months = tenor.parse::<crate::time::Tenor>().map_or(u32::MAX, |t| t.months());
        let rank = bond_rows.values().find_map(|v| v.iter().position(|&j| j == i)).unwrap_or(0);
        (tm[i].clone(), months, rank)
    });
    for i in order {
        let _ = writeln!(
            w,
            "| {} | {} | {} | {} | {} | {} | {} |",
            super::markdown::cell_text(tm[i].as_deref().unwrap_or("")),
            super::markdown::cell_text(tt[i].as_deref().unwrap_or("")),
            tn[i].unwrap_or(0),
            opt(a05[i], |v| format!("{v:.2e}")),
            opt(a50[i], |v| format!("{v:.2e}")),
            opt(a95[i], |v| format!("{v:.2e}")),
            opt(a99[i], |v| format!("{v:.2e}"))
        );
        if tm[i].as_deref() == Some("bootstrap") {
            let q = [a01[i], a05[i], a50[i], a95[i], a99[i]].map(|v| v.unwrap_or(0.0));
            boot.push((tt[i].clone().unwrap_or_default(), q));
        }
    }
    for (method, n) in &hidden {
        let _ = writeln!(
            w,
            "\n{} bonds, the ten with the largest 99% quantile shown, worst first; {n} more in `tables/residual_tenors.parquet`.",
            super::markdown::cell_text(method)
        );
    }
    let _ = writeln!(w);
    if !boot.is_empty()
        && save_chart(
            charts_dir,
            "residuals-by-tenor.svg",
            charts::quantile_bands_by_category("Bootstrap |residual| by tenor", "|residual| (bp)", &boot),
        )?
    {
        *figure += 1;
        let _ = writeln!(w, "![Residuals by tenor](charts/residuals-by-tenor.svg)\n");
        let _ = writeln!(w, "*Figure {figure}. Quantiles of the bootstrap's absolute repricing residual per tenor: whiskers 1-99%, box 5-95%, line at the median (bp, linear scale).*\n");
    }
    let wpath = tables.join("residual_worst.parquet");
    let wdf = read_frame(&wpath)?;
    let (wd, we, wm, wt, wk, wmod, wr, wc) = (
        dates(&wdf, &wpath, "date")?,
        strs(&wdf, &wpath, "entity")?,
        strs(&wdf, &wpath, "method")?,
        strs(&wdf, &wpath, "tenor_or_bond")?,
        floats(&wdf, &wpath, "market")?,
        floats(&wdf, &wpath, "model")?,
        floats(&wdf, &wpath, "residual_bp")?,
        bools(&wdf, &wpath, "converged")?,
    );
    if wdf.height() > 0 {
        let _ = writeln!(w, "Largest residuals, with their quotes:\n\n| date | entity | method | tenor or bond | market | model | residual bp | converged |\n| --- | --- | --- | --- | ---: | ---: | ---: | --- |");
        for i in 0..wdf.height().min(10) {
            let _ = writeln!(
                w,
                "| {} | {} | {} | {} | {} | {} | {} | {} |",
                wd[i].map(|d: NaiveDate| d.to_string()).unwrap_or_default(),
                super::markdown::cell_text(we[i].as_deref().unwrap_or("")),
                wm[i].as_deref().unwrap_or(""),
                super::markdown::cell_text(wt[i].as_deref().unwrap_or("")),
                opt(wk[i], |v| format!("{v:.6}")),
                opt(wmod[i], |v| format!("{v:.6}")),
                opt(wr[i], |v| format!("{v:.3e}")),
                if wc[i] == Some(true) { "yes" } else { "no" }
            );
        }
        let _ = writeln!(w);
    }
    Ok(())
}
