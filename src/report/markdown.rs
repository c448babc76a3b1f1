//! `report.md`: the reviewer's document, rendered from the run's own tables and manifest (so a
//! later `hazardline report RUN_DIR` gives the same text). Numbers in bp and %, figures as SVG
//! files in `charts/`, each with a caption. Deterministic: no clock, stable ordering.

use super::charts;
use super::manifest::{self, write_text, Manifest};
use super::readback;
use super::tables::HazardCurveRow;
use crate::error::{Error, Result};
use chrono::NaiveDate;
use std::collections::{BTreeMap, BTreeSet};
use std::fmt::Write as _;
use std::path::Path;

/// The caution every report carries (DEVELOPERS.md).
pub const CAUTION: &str = "The figures in this report support, and do not replace, independent model validation under the institution's model risk policy and the supervisory rules that apply to it.";

/// Repricing tolerance used in the summary (bp).
pub const REPRICE_TOLERANCE_BP: f64 = 1e-6;

fn pct(x: f64) -> String {
    format!("{:.1}%", x * 100.0)
}

fn file_stem(name: &str) -> String {
    name.chars().map(|c| if c.is_ascii_alphanumeric() { c.to_ascii_lowercase() } else { '-' }).collect::<String>().trim_matches('-').to_string()
}

fn quantile(sorted: &[f64], q: f64) -> f64 {
    if sorted.is_empty() {
        return f64::NAN;
    }
    let pos = q * (sorted.len() - 1) as f64;
    let (i, f) = (pos.floor() as usize, pos - pos.floor());
    if i + 1 < sorted.len() {
        sorted[i] * (1.0 - f) + sorted[i + 1] * f
    } else {
        sorted[i]
    }
}

/// Options of the figures (from the pipeline file, recorded in the manifest's settings).
fn charted(settings: &serde_json::Value, entities: &BTreeSet<String>) -> Vec<String> {
    match settings.get("charted_entities").and_then(|v| v.as_array()) {
        Some(v) => v.iter().filter_map(|x| x.as_str()).filter(|e| entities.contains(*e)).map(str::to_string).collect(),
        None => entities.iter().take(4).cloned().collect(),
    }
}

fn term_dates(settings: &serde_json::Value, dates: &[NaiveDate]) -> Vec<NaiveDate> {
    if let Some(v) = settings.get("term_structure_dates").and_then(|v| v.as_array()) {
        let want: Vec<NaiveDate> = v.iter().filter_map(|x| x.as_str()).filter_map(crate::time::parse_iso_date).collect();
        // The latest curve date on or before each asked date.
        return want.iter().filter_map(|w| dates.iter().rev().find(|d| *d <= w).copied()).collect::<BTreeSet<_>>().into_iter().collect();
    }
    match dates.len() {
        0 => vec![],
        1 | 2 => dates.to_vec(),
        n => vec![dates[0], dates[n / 2], dates[n - 1]],
    }
}

/// Renders `report.md` and `charts/*.svg` in `run_dir` from its tables and manifest.
pub fn render(run_dir: &Path) -> Result<()> {
    let m: Manifest = manifest::read(&run_dir.join("manifest.json"))?;
    let t = run_dir.join("tables");
    let hazard = readback::hazard_curves(&t.join("hazard_curves.parquet"))?;
    let residuals = readback::residuals(&t.join("calibration_residuals.parquet"))?;
    let flags = readback::flags(&t.join("flags.parquet"))?;
    let reasons = readback::reject_reasons(&t.join("rejects.parquet"))?;
    let charts_dir = run_dir.join("charts");

    let entities: BTreeSet<String> = hazard.iter().map(|h| h.entity.clone()).collect();
    let currencies: BTreeSet<String> = hazard.iter().map(|h| h.currency.clone()).collect();
    let dates: Vec<NaiveDate> = hazard.iter().map(|h| h.date).collect::<BTreeSet<_>>().into_iter().collect();
    let curves: BTreeSet<(NaiveDate, &str, &str)> = hazard.iter().map(|h| (h.date, h.entity.as_str(), h.currency.as_str())).collect();
    let bad_curves: BTreeSet<(NaiveDate, &str, &str)> =
        hazard.iter().filter(|h| h.status != "ok").map(|h| (h.date, h.entity.as_str(), h.currency.as_str())).collect();
    let ok_res: Vec<&super::tables::ResidualRow> = residuals.iter().filter(|r| r.status == "ok").collect();
    let within = ok_res.iter().filter(|r| r.residual_bp.abs() <= REPRICE_TOLERANCE_BP).count();
    let mut status_counts: BTreeMap<&str, usize> = BTreeMap::new();
    for h in &hazard {
        *status_counts.entry(h.status).or_default() += 1;
    }
    let mut flag_counts: BTreeMap<(&str, &str), usize> = BTreeMap::new();
    for f in &flags {
        *flag_counts.entry((f.0.as_str(), f.1.as_str())).or_default() += 1;
    }
    let red = flags.iter().filter(|f| f.1 == "red").count();
    let accounting_ok = m.counts.iter().all(|c| c.rows_in == c.used + c.rejected);

    let mut md = String::new();
    let w = &mut md;
    let _ = writeln!(w, "# Validation review: {} ({})\n", m.name, m.label);
    let _ = writeln!(w, "> **Caution.** {CAUTION}\n");
    let _ = writeln!(w, "Produced by hazardline {} from pipeline file `{}` (SHA-256 `{}`). Inputs and their hashes are listed in `manifest.json`.\n", m.version, m.pipeline.path, &m.pipeline.sha256[..16]);

    // 1. Summary
    let _ = writeln!(w, "## 1. Summary\n");
    if let Some((a, b)) = &m.period {
        let _ = writeln!(w, "- Period: {a} to {b} ({} curve dates).", dates.len());
    }
    let _ = writeln!(w, "- Universe: {} entities in {} currencies ({}).", entities.len(), currencies.len(), currencies.iter().cloned().collect::<Vec<_>>().join(", "));
    let _ = writeln!(w, "- Scope of this run: input data quality and the daily CDS hazard-curve bootstrap with its repricing residuals. Parameter stability, the intensity-model fits and the backtest of implied against realised default rates are not part of this run.\n");
    let _ = writeln!(w, "| check | result | status |\n| --- | --- | --- |");
    let _ = writeln!(w, "| every input row used or rejected with a reason | {} tables | {} |", m.counts.iter().filter(|c| c.stage == "calibrate").count(), if accounting_ok { "pass" } else { "FAIL" });
    let rej_total: u64 = m.counts.iter().filter(|c| c.stage == "calibrate").map(|c| c.rejected).sum();
    let in_total: u64 = m.counts.iter().filter(|c| c.stage == "calibrate").map(|c| c.rows_in).sum();
    let _ = writeln!(w, "| rows rejected | {rej_total} of {in_total} ({}) | {} |", pct(rej_total as f64 / in_total.max(1) as f64), if rej_total == 0 { "pass" } else { "see section 2" });
    let _ = writeln!(
        w,
        "| curves with every node calibrated | {} of {} ({}) | {} |",
        curves.len() - bad_curves.len(),
        curves.len(),
        pct((curves.len() - bad_curves.len()) as f64 / curves.len().max(1) as f64),
        if bad_curves.is_empty() { "pass" } else { "flagged" }
    );
    let _ = writeln!(
        w,
        "| calibrated quotes repricing within {REPRICE_TOLERANCE_BP:e} bp | {within} of {} ({}) | {} |",
        ok_res.len(),
        pct(within as f64 / ok_res.len().max(1) as f64),
        if within == ok_res.len() { "pass" } else { "flagged" }
    );
    let _ = writeln!(w, "| data-quality flags (rows kept) | {} | {} |\n", flags.len(), if flags.is_empty() { "pass" } else { "see section 4" });

    // 2. Data quality
    let _ = writeln!(w, "## 2. Data quality\n");
    let _ = writeln!(w, "Every input row is either used or rejected with a reason code; the identity rows in = used + rejected holds for every table after each stage.\n");
    let _ = writeln!(w, "| stage | table | rows in | used | rejected | flagged |\n| --- | --- | ---: | ---: | ---: | ---: |");
    for c in &m.counts {
        let _ = writeln!(w, "| {} | {} | {} | {} | {} | {} |", c.stage, c.table, c.rows_in, c.used, c.rejected, c.flagged);
    }
    if reasons.is_empty() {
        let _ = writeln!(w, "\nNo rows were rejected.\n");
    } else {
        let _ = writeln!(w, "\nReject reasons (all rows are listed with file, row and detail in `tables/rejects.parquet`):\n");
        let _ = writeln!(w, "| table | reason | rows |\n| --- | --- | ---: |");
        for (t, r, n) in &reasons {
            let _ = writeln!(w, "| {t} | `{r}` | {n} |");
        }
        let _ = writeln!(w);
    }

    // 3. Calibration and residuals
    let _ = writeln!(w, "## 3. Calibration and residuals\n");
    let _ = writeln!(w, "Hazard curves are bootstrapped per (date, entity, currency) from the standard-contract CDS quotes; every calibrated quote is then repriced on its curve by an independent pass of the leg pricer.\n");
    let _ = writeln!(w, "| node status | nodes |\n| --- | ---: |");
    for (s, n) in &status_counts {
        let _ = writeln!(w, "| `{s}` | {n} |");
    }
    let _ = writeln!(w);
    // Residuals per tenor.
    let mut by_tenor: BTreeMap<(u32, String), Vec<f64>> = BTreeMap::new();
    for r in &ok_res {
        let months = r.tenor_or_bond.parse::<crate::time::Tenor>().map(|t| t.months()).unwrap_or(0);
        by_tenor.entry((months, r.tenor_or_bond.clone())).or_default().push(r.residual_bp);
    }
    if !by_tenor.is_empty() {
        let _ = writeln!(w, "Residuals (model minus market, bp) of nodes with status `ok`, per tenor:\n");
        let _ = writeln!(w, "| tenor | quotes | mean | RMSE | largest abs |\n| --- | ---: | ---: | ---: | ---: |");
        for ((_, t), v) in &by_tenor {
            let n = v.len() as f64;
            let mean = v.iter().sum::<f64>() / n;
            let rmse = (v.iter().map(|x| x * x).sum::<f64>() / n).sqrt();
            let mx = v.iter().fold(0.0f64, |a, x| a.max(x.abs()));
            let _ = writeln!(w, "| {t} | {} | {mean:.2e} | {rmse:.2e} | {mx:.2e} |", v.len());
        }
        let _ = writeln!(w);
    }
    let mut worst: Vec<&super::tables::ResidualRow> = residuals.iter().filter(|r| r.residual_bp.is_finite()).collect();
    worst.sort_by(|a, b| b.residual_bp.abs().total_cmp(&a.residual_bp.abs()).then(a.date.cmp(&b.date)).then(a.entity.cmp(&b.entity)));
    worst.truncate(10);
    if !worst.is_empty() {
        let _ = writeln!(w, "Largest residuals (all statuses):\n");
        let _ = writeln!(w, "| date | entity | tenor | status | market | model | residual (bp) |\n| --- | --- | --- | --- | ---: | ---: | ---: |");
        for r in &worst {
            let _ = writeln!(w, "| {} | {} | {} | `{}` | {:.4} | {:.4} | {:.3e} |", r.date, r.entity, r.tenor_or_bond, r.status, r.market, r.model, r.residual_bp);
        }
        let _ = writeln!(w);
    }
    let bad: Vec<&HazardCurveRow> = hazard.iter().filter(|h| h.status != "ok").take(10).collect();
    if !bad.is_empty() {
        let _ = writeln!(w, "Nodes not calibrated as quoted (first {} of {}):\n", bad.len(), hazard.iter().filter(|h| h.status != "ok").count());
        let _ = writeln!(w, "| date | entity | tenor | status | detail |\n| --- | --- | --- | --- | --- |");
        for h in bad {
            let _ = writeln!(w, "| {} | {} | {} | `{}` | {} |", h.date, h.entity, h.tenor, h.status, h.detail.clone().unwrap_or_default().replace('|', "/"));
        }
        let _ = writeln!(w);
    }

    // Figures.
    let mut figure = 0;
    let chart_err = |e: String| Error::Other(format!("drawing a figure: {e}"));
    let chosen = charted(&m.settings, &entities);
    let tdates = term_dates(&m.settings, &dates);
    for e in &chosen {
        let mut curves_of: Vec<(NaiveDate, Vec<(f64, f64)>)> = Vec::new();
        for d in &tdates {
            let nodes: Vec<(f64, f64)> = hazard
                .iter()
                .filter(|h| &h.entity == e && h.date == *d && h.hazard.is_some())
                .map(|h| (crate::curves::year_time(*d, h.node_date), h.hazard.unwrap_or(0.0)))
                .collect();
            if !nodes.is_empty() {
                curves_of.push((*d, nodes));
            }
        }
        if curves_of.is_empty() {
            continue;
        }
        let file = format!("term-structure-{}.svg", file_stem(e));
        let svg = charts::term_structure(&format!("Hazard term structure: {e}"), &curves_of).map_err(chart_err)?;
        write_text(&charts_dir.join(&file), &svg)?;
        figure += 1;
        let _ = writeln!(w, "![Hazard term structure of {e}](charts/{file})\n");
        let _ = writeln!(w, "*Figure {figure}. Bootstrapped piecewise-flat hazard rate of {e} against time to each node, on {}.*\n", curves_of.iter().map(|c| c.0.to_string()).collect::<Vec<_>>().join(", "));
    }
    // 5Y hazard through time with the universe band.
    let five: Vec<&HazardCurveRow> = hazard.iter().filter(|h| h.tenor == "5Y" && h.hazard.is_some() && h.status == "ok").collect();
    if !five.is_empty() {
        let mut per_date: BTreeMap<NaiveDate, Vec<f64>> = BTreeMap::new();
        for h in &five {
            per_date.entry(h.date).or_default().push(h.hazard.unwrap_or(0.0) * 100.0);
        }
        let band: Vec<(f64, f64, f64, f64)> = per_date
            .iter_mut()
            .map(|(d, v)| {
                v.sort_by(f64::total_cmp);
                (charts::decimal_year(*d), quantile(v, 0.1), quantile(v, 0.5), quantile(v, 0.9))
            })
            .collect();
        let series: Vec<(String, Vec<(f64, f64)>)> = chosen
            .iter()
            .map(|e| (e.clone(), five.iter().filter(|h| &h.entity == e).map(|h| (charts::decimal_year(h.date), h.hazard.unwrap_or(0.0) * 100.0)).collect()))
            .filter(|(_, v): &(String, Vec<(f64, f64)>)| !v.is_empty())
            .collect();
        let svg = charts::history_with_band("5Y hazard rate through time", "hazard rate (% per year)", &series, &band).map_err(chart_err)?;
        write_text(&charts_dir.join("hazard-5y-history.svg"), &svg)?;
        figure += 1;
        let _ = writeln!(w, "![5Y hazard through time](charts/hazard-5y-history.svg)\n");
        let _ = writeln!(w, "*Figure {figure}. Hazard rate of the segment ending at the 5Y node, per curve date, for the charted entities, over the universe's 10%-90% range (shaded) and median (grey line).*\n");
    }
    let logs: Vec<f64> = residuals.iter().filter(|r| r.residual_bp.is_finite()).map(|r| (r.residual_bp.abs().max(1e-16)).log10()).collect();
    if !logs.is_empty() {
        let svg = charts::histogram("Repricing residuals", "log10 |model - market| (bp)", &logs, 30).map_err(chart_err)?;
        write_text(&charts_dir.join("residual-histogram.svg"), &svg)?;
        figure += 1;
        let _ = writeln!(w, "![Residual histogram](charts/residual-histogram.svg)\n");
        let _ = writeln!(w, "*Figure {figure}. Distribution of the absolute repricing residuals of all repriced quotes on a log scale (residuals below 1e-16 bp are shown at -16). Floored nodes, if any, sit far to the right.*\n");
    }

    // 4. Flags
    let _ = writeln!(w, "## 4. Flags\n");
    if flags.is_empty() {
        let _ = writeln!(w, "No flags were raised.\n");
    } else {
        let _ = writeln!(w, "Flags do not remove data; each points to the entity, series and date it concerns (`tables/flags.parquet`, with the source file and row).\n");
        let _ = writeln!(w, "| rule | severity | count |\n| --- | --- | ---: |");
        for ((r, s), n) in &flag_counts {
            let _ = writeln!(w, "| `{r}` | {s} | {n} |");
        }
        let _ = writeln!(w, "\nFirst flags:\n\n| rule | entity | series | date | explanation |\n| --- | --- | --- | --- | --- |");
        for f in flags.iter().take(15) {
            let _ = writeln!(w, "| `{}` | {} | {} | {} | {} |", f.0, f.2, f.3, f.4.map(|d| d.to_string()).unwrap_or_default(), f.7.replace('|', "/"));
        }
        let _ = writeln!(w, "\nRed flags: {red}.\n");
    }

    // 5. Method notes
    let s = &m.settings;
    let q = s.get("quality").cloned().unwrap_or_default();
    let _ = writeln!(w, "## 5. Method notes\n");
    let _ = writeln!(w, "- Contract: the standard single-name CDS (quarterly premium on the 20th of Mar/Jun/Sep/Dec adjusted Following, maturities on the semi-annual roll, Act/360 accrual with the maturity day in the last period, accrual paid on default, protection from T + 1, cash settlement T + 3 business days). Legs are integrated in closed form on the joint grid of discount and hazard nodes (accrual on default: {} integration), with the series expansion below an exponent of 1e-4; the independent reference is QuantLib's standard-model engine (tests/reference/).", s.get("accrual_on_default").and_then(|v| v.as_str()).unwrap_or("standard"));
    let _ = writeln!(w, "- Discount curves: continuously compounded Act/365F zero rates, log-linear discount factors between pillars, first rate before the first pillar, last forward after the last.");
    let _ = writeln!(w, "- Bootstrap: hazard piecewise flat between contract maturities (segment end = adjusted maturity + 1 day), one safeguarded Newton root per node to 1e-14 in hazard. A quote needing a negative hazard is handled by the `{}` policy; a quote no hazard up to 10,000 per year can reach stops its curve.", s.get("infeasible").and_then(|v| v.as_str()).unwrap_or("floor"));
    let by_sen = s.get("recovery_by_seniority").and_then(|v| v.as_object()).map(|m| m.iter().map(|(k, v)| format!("{k}: {}", v.as_f64().map(pct).unwrap_or_default())).collect::<Vec<_>>().join(", ")).filter(|t| !t.is_empty()).unwrap_or_else(|| "none listed".into());
    let _ = writeln!(w, "- Recovery: {} unless the quote carries one or its seniority is listed (by seniority: {by_sen}).", s.get("recovery").and_then(|v| v.as_f64()).map(pct).unwrap_or_default());
    let _ = writeln!(w, "- Data-quality thresholds in force: spread cap {} bp; zero-rate band {}; bond price band {}; stale after {} unchanged business days; spike when the robust z-score (median and 1.4826 x MAD of the series' daily log changes) exceeds {} with a log move above {} reverting by at least {} the next day; unit slip when {} or more consecutive quotes sit {} times above or below the series median; fewer than {} tenors flags a curve (common practice, no single source).",
        q.get("max_spread_bp").map(|v| v.to_string()).unwrap_or_default(),
        q.get("zero_rate_band").map(|v| v.to_string()).unwrap_or_default(),
        q.get("bond_price_band").map(|v| v.to_string()).unwrap_or_default(),
        q.get("stale_days").map(|v| v.to_string()).unwrap_or_default(),
        q.get("spike_z").map(|v| v.to_string()).unwrap_or_default(),
        q.get("spike_min_log_move").map(|v| v.to_string()).unwrap_or_default(),
        q.get("spike_revert_share").map(|v| v.to_string()).unwrap_or_default(),
        q.get("unit_slip_min_run").map(|v| v.to_string()).unwrap_or_default(),
        q.get("unit_slip_ratio").map(|v| v.to_string()).unwrap_or_default(),
        q.get("min_tenors").map(|v| v.to_string()).unwrap_or_default());
    let _ = writeln!(w, "- Reproducibility: the tables and this report are deterministic for the same inputs and pipeline file; timings are in `run.log`, not here.\n");
    let _ = writeln!(w, "## 6. Caution\n\n{CAUTION} Every conclusion should be checked against the data and these method notes before it is relied on.");
    write_text(&run_dir.join("report.md"), &md)
}
