//! `report.md`: the reviewer's document, rendered from the run's own tables and manifest (so a
//! later `hazardline report RUN_DIR` gives the same text). Numbers in bp and %, figures as SVG
//! files in `charts/`, each with a caption. Deterministic: no clock, stable ordering.

use super::charts;
use super::fits_section::intensity_sections;
use super::folds::{CdsNodes, Residuals};
pub use super::folds::{NodeFold, ResidualFold};
use crate::calibrate::cir::{CirFitMode, CirFitSettings};
use crate::error::{Error, Result};
use crate::ingest::Reject;
use crate::tables::flags::{FlagRecord, DATA_QUALITY, STABILITY};
use crate::tables::inputs::reject_reasons;
use crate::tables::manifest::RecordedSettings;
use crate::tables::manifest::{self, write_text, Manifest};
use crate::tables::readback;
use crate::tables::{self, BasisRow, HazardCurveRow, IntensityParamRow, ResidualRow, Table};
use crate::text::{RowStatus, Severity};
use chrono::NaiveDate;
use std::collections::{BTreeMap, BTreeSet};
use std::fmt::Write as _;
use std::path::Path;

/// The caution every report carries (DEVELOPERS.md).
pub const CAUTION: &str = "The figures in this report support, and do not replace, independent model validation under the institution's model risk policy and the supervisory rules that apply to it.";

pub(super) fn pct(x: f64) -> String {
    format!("{:.1}%", x * 100.0)
}

/// `part` of `whole` as a percentage with one decimal, or as many more as it takes for a
/// shortfall never to read 100% and a non-zero part never to read 0% (29 failures in 303,387
/// read 99.99%, not 100.0%).
pub(super) fn share(part: u64, whole: u64) -> String {
    if whole == 0 {
        return "-".into();
    }
    let x = 100.0 * part as f64 / whole as f64;
    for decimals in 1..=9 {
        let text = format!("{x:.decimals$}");
        let reads_full = text.parse::<f64>().is_ok_and(|v| v >= 100.0);
        let reads_zero = text.parse::<f64>().is_ok_and(|v| v <= 0.0);
        if !(part < whole && reads_full || part > 0 && reads_zero) {
            return format!("{text}%");
        }
    }
    format!("{x:e}%")
}

/// Text from the data (an entity, a currency, a bond or tenor label, a sentence naming them)
/// made safe for a Markdown table cell and for HTML: characters that would end a cell, start a
/// link, an image, a code span or a tag are escaped. Plain names pass unchanged.
pub fn cell_text(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '\\' | '|' | '`' | '[' | ']' => {
                out.push('\\');
                out.push(c);
            }
            c if c.is_control() => out.push(' '),
            c => out.push(c),
        }
    }
    out
}

/// A figure file name stem for each of `names`: [`file_stem`], with a short hash of the name
/// added where two names give one stem (names that differ only in case or punctuation) or a
/// name gives none, so no figure overwrites another's.
pub(super) fn unique_stems(names: &[String]) -> BTreeMap<String, String> {
    let mut uses: BTreeMap<String, usize> = BTreeMap::new();
    for n in names {
        *uses.entry(file_stem(n)).or_default() += 1;
    }
    names
        .iter()
        .map(|n| {
            let stem = file_stem(n);
            let stem = if stem.is_empty() || uses[&stem] > 1 {
                format!("{stem}-{:08x}", crate::hash::fnv1a(n.as_bytes()) as u32)
            } else {
                stem
            };
            (n.clone(), stem)
        })
        .collect()
}

pub(super) fn file_stem(name: &str) -> String {
    name.chars()
        .map(|c| if c.is_ascii_alphanumeric() { c.to_ascii_lowercase() } else { '-' })
        .collect::<String>()
        .trim_matches('-')
        .to_string()
}

pub(super) fn quantile(sorted: &[f64], q: f64) -> f64 {
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

/// The 10%, 50% and 90% quantiles of each date's values, as (decimal year, p10, p50, p90),
/// for the universe band of a history figure.
pub(super) fn quantile_band(per_date: &mut BTreeMap<NaiveDate, Vec<f64>>) -> Vec<(f64, f64, f64, f64)> {
    per_date
        .iter_mut()
        .map(|(d, v)| {
            v.sort_by(f64::total_cmp);
            (charts::decimal_year(*d), quantile(v, 0.1), quantile(v, 0.5), quantile(v, 0.9))
        })
        .collect()
}

/// A recorded band `[lo, hi]`, as JSON writes it.
fn band(b: &[serde_json::Number; 2]) -> String {
    format!("[{},{}]", b[0], b[1])
}

/// A parameter's bounds `[lo, hi]`, small numbers in exponent form (`[1e-6, 2]`).
fn bounds((lo, hi): (f64, f64)) -> String {
    let short = |x: f64| if x == 0.0 || x.abs() >= 1e-3 { format!("{x}") } else { format!("{x:e}") };
    format!("[{}, {}]", short(lo), short(hi))
}

/// The palette slot of each entity drawn in a figure, so that one entity has one colour in every
/// figure of the report: its place among the charted entities, or, for the others, a place
/// after them in name order.
pub(super) fn colour_slots<'a>(charted: &[String], names: impl Iterator<Item = &'a str>) -> Vec<usize> {
    let names: Vec<&str> = names.collect();
    let mut others: Vec<&str> = names.iter().copied().filter(|n| !charted.iter().any(|c| c == n)).collect();
    others.sort_unstable();
    names
        .iter()
        .map(|n| {
            charted
                .iter()
                .position(|c| c == n)
                .unwrap_or_else(|| charted.len() + others.iter().position(|o| o == n).unwrap_or(0))
        })
        .collect()
}

/// Options of the figures (from the pipeline file, recorded in the manifest's settings).
fn charted(settings: &RecordedSettings, entities: &BTreeSet<String>) -> Vec<String> {
    match &settings.charted_entities {
        Some(v) => v.iter().filter(|e| entities.contains(*e)).cloned().collect(),
        None => entities.iter().take(4).cloned().collect(),
    }
}

fn term_dates(settings: &RecordedSettings, dates: &[NaiveDate]) -> Vec<NaiveDate> {
    if let Some(v) = &settings.term_structure_dates {
        let want: Vec<NaiveDate> = v.iter().filter_map(|x| crate::time::parse_iso_date(x)).collect();
        // The latest curve date on or before each asked date.
        return want
            .iter()
            .filter_map(|w| dates.iter().rev().find(|d| *d <= w).copied())
            .collect::<BTreeSet<_>>()
            .into_iter()
            .collect();
    }
    match dates.len() {
        0 => vec![],
        1 | 2 => dates.to_vec(),
        n => vec![dates[0], dates[n / 2], dates[n - 1]],
    }
}

/// The discount curves the run used, by source and currency (from `discount_curves`: the
/// discount table's, and the standard curves built from deposit and swap quotes).
fn discount_sources(w: &mut String, tables: &Path) -> Result<()> {
    let path = readback::table_path(tables, tables::DiscountCurveRow::NAME);
    let rows: Vec<tables::DiscountCurveRow> = tables::read_from(&path)?;
    let mut by: BTreeMap<(&str, &str), (BTreeSet<NaiveDate>, usize)> = BTreeMap::new();
    for r in &rows {
        let e = by.entry((r.source, r.currency.as_str())).or_default();
        e.0.insert(r.date);
        e.1 += 1;
    }
    if by.is_empty() {
        return Ok(());
    }
    let _ = writeln!(w, "Discount curves (every pillar in `tables/discount_curves.parquet`): `discount` from the discount table, `rate_quotes` the standard curve built from deposit and swap quotes (see the method notes).\n");
    let _ = writeln!(w, "| source | currency | curves | pillars |\n| --- | --- | ---: | ---: |");
    for ((source, ccy), (dates, n)) in &by {
        let _ = writeln!(w, "| `{source}` | {} | {} | {n} |", cell_text(ccy), dates.len());
    }
    let _ = writeln!(w);
    Ok(())
}

/// The sensitivity dates as the manifest records them (`month_ends`, `off` or a list).
fn settings_sensitivity_dates(m: &Manifest) -> String {
    match m.settings.get("sensitivity_dates") {
        Some(serde_json::Value::String(s)) => s.clone(),
        Some(serde_json::Value::Array(a)) => format!("{} listed dates", a.len()),
        _ => "not recorded".into(),
    }
}

/// Section 3's sensitivity subsection: per grade, the median change of each measure under
/// each shift, over the curves of the sensitivity dates (table `sensitivities`).
fn sensitivity_summary(w: &mut String, rows: &[tables::SensitivityRow], dates: &str) {
    use crate::calibrate::sensitivity::Shift;
    if rows.is_empty() {
        let _ = writeln!(w, "Sensitivities: none computed (sensitivity dates: {}).\n", cell_text(dates));
        return;
    }
    let curves = rows.iter().filter(|r| r.shift == Shift::Base).count();
    let days: BTreeSet<NaiveDate> = rows.iter().map(|r| r.date).collect();
    let _ = writeln!(w, "### Sensitivities\n");
    let _ = writeln!(w, "{curves} curves on {} sensitivity dates ({}) re-bootstrapped with one input or modelling choice changed (every row in `tables/sensitivities.parquet`; the shifts are listed in the method notes). Medians per grade over the curves whose shifted bootstrap is `ok`, in bp: the change of the 1Y PD and of the 5Y hazard, and of the 5Y contract's upfront at the standard coupon (bp of notional; under quotes +1 bp, the CS01).\n", days.len(), cell_text(dates));
    let shifts = [
        (Shift::QuotesUp1bp, "quotes +1 bp"),
        (Shift::RecoveryUp5, "recovery +5 pt"),
        (Shift::RecoveryDown5, "recovery -5 pt"),
        (Shift::DiscountUp1bp, "discount +1 bp"),
        (Shift::AccrualStandard, "accrual `standard`"),
        (Shift::AccrualExact, "accrual `exact`"),
    ];
    let mut grades: BTreeMap<Option<i64>, Vec<&tables::SensitivityRow>> = BTreeMap::new();
    for r in rows {
        grades.entry(r.grade).or_default().push(r);
    }
    let grade_name = |g: &Option<i64>| g.map_or("no grade".to_string(), |g| g.to_string());
    let _ = writeln!(
        w,
        "| grade | curves | shift | 1Y PD | 5Y hazard | 5Y upfront |\n| --- | ---: | --- | ---: | ---: | ---: |"
    );
    for (g, rs) in &grades {
        let n = rs.iter().filter(|r| r.shift == Shift::Base).count();
        for (shift, name) in shifts {
            let ok: Vec<&&tables::SensitivityRow> =
                rs.iter().filter(|r| r.shift == shift && r.status == "ok").collect();
            if ok.is_empty() {
                continue;
            }
            let med = |f: &dyn Fn(&tables::SensitivityRow) -> Option<f64>| {
                let mut v: Vec<f64> = ok.iter().filter_map(|r| f(r)).collect();
                if v.is_empty() {
                    return f64::NAN;
                }
                super::fits_section::median(&mut v) * 1e4
            };
            let _ = writeln!(
                w,
                "| {} | {n} | {name} | {:.3} | {:.3} | {:.3} |",
                grade_name(g),
                med(&|r| r.pd_1y_change),
                med(&|r| r.hazard_5y_change),
                med(&|r| r.upfront_5y_change)
            );
        }
    }
    let _ = writeln!(w);
    let other = rows.iter().filter(|r| r.shift == Shift::OtherInfeasiblePolicy).collect::<Vec<_>>();
    let floored = rows.iter().filter(|r| r.shift == Shift::Base && r.floored_nodes > 0).count();
    let differ = other.iter().filter(|r| r.status != "ok" || r.hazard_5y_change.is_some_and(|c| c != 0.0)).count();
    let out_of_range = rows.iter().filter(|r| r.status == "out_of_range").count();
    let _ = writeln!(w, "Infeasible policy: curves with a node floored at zero hazard: {floored} of {curves}; curves that fail or differ under the other policy: {differ}. Recovery shifts outside [0, 1): {out_of_range}.\n");
}

/// Renders `report.md` and `charts/*.svg` in `run_dir` from its tables and manifest.
pub fn render(run_dir: &Path) -> Result<()> {
    render_with(run_dir, None)
}

/// Table `T` of the run's `tables` folder; empty when the folder has none (a run folder
/// written before the table existed).
fn read_if_written<T: Table>(tables: &Path) -> Result<Vec<T>> {
    if crate::tables::readback::table_path(tables, T::NAME).exists() {
        crate::tables::read(tables)
    } else {
        Ok(Vec::new())
    }
}

/// [`render`], with what the report takes from the node and residual tables already gathered
/// as a run wrote them (the same rows in the same order: the same report).
pub fn render_with(run_dir: &Path, folds: Option<(NodeFold, ResidualFold)>) -> Result<()> {
    let manifest_path = run_dir.join("manifest.json");
    let m: Manifest = manifest::read(&manifest_path)?;
    let settings = m.recorded_settings(&manifest_path)?;
    let tolerance_bp = settings.reprice_tolerance_bp(&manifest_path)?;
    let t = run_dir.join("tables");
    // The smaller tables the report reads whole, read side by side.
    let ((params, basis), ((flags, rejects), sensitivities)) = rayon::join(
        || (read_if_written::<IntensityParamRow>(&t), read_if_written::<BasisRow>(&t)),
        || {
            rayon::join(
                || rayon::join(|| tables::read::<FlagRecord>(&t), || tables::read::<Reject>(&t)),
                || read_if_written::<tables::SensitivityRow>(&t),
            )
        },
    );
    let (params, basis, flags, sensitivities) = (params?, basis?, flags?, sensitivities?);
    let reasons = reject_reasons(&rejects?);
    // The node and residual tables hold a row per quote and can be tens of millions of rows:
    // they are read a slice at a time into what the report shows, never whole.
    let (hz, rs) = match folds {
        Some((NodeFold(hz), ResidualFold(rs))) => (hz, rs),
        None => (
            CdsNodes::read(&readback::table_path(&t, HazardCurveRow::NAME), settings.charted_entities.as_deref())?,
            Residuals::read(&readback::table_path(&t, ResidualRow::NAME), tolerance_bp)?,
        ),
    };
    let bond_hazard = &hz.bond;
    let bond_res: Vec<&crate::tables::ResidualRow> = rs.bond.iter().collect();
    let charts_dir = run_dir.join("charts");

    let entities = &hz.entities;
    let currencies = &hz.currencies;
    let dates: Vec<NaiveDate> = hz.dates.iter().copied().collect();
    let (n_curves, n_bad_curves) = (hz.curves, hz.bad_curves.len());
    let (ok_res, within) = (rs.ok, rs.within);
    let status_counts = &hz.status_counts;
    let mut flag_counts: BTreeMap<(&str, &str, &str), usize> = BTreeMap::new();
    for f in &flags {
        *flag_counts.entry((f.stage, f.flag.rule.as_str(), f.flag.severity.as_str())).or_default() += 1;
    }
    let red = flags.iter().filter(|f| f.flag.severity == Severity::Red).count();
    let accounting_ok = m.counts.iter().all(|c| c.rows_in == c.used + c.rejected);

    let mut md = String::new();
    let w = &mut md;
    let _ = writeln!(w, "# Validation review: {} ({})\n", m.name, m.label);
    let _ = writeln!(w, "> **Caution.** {CAUTION}\n");
    let _ = writeln!(w, "Produced by hazardline {} (source revision `{}`) from pipeline file `{}` (SHA-256 `{}`). Inputs and their hashes are listed in `manifest.json`.\n", m.version, cell_text(&m.source_revision), cell_text(&m.pipeline.path), cell_text(&m.pipeline.sha256));

    // 1. Summary
    let _ = writeln!(w, "## 1. Summary\n");
    if let Some((a, b)) = &m.period {
        let _ = writeln!(w, "- Period: {a} to {b} ({} curve dates).", dates.len());
    }
    let _ = writeln!(
        w,
        "- Universe: {} entities in {} currencies ({}).",
        entities.len(),
        currencies.len(),
        currencies.iter().cloned().collect::<Vec<_>>().join(", ")
    );
    let bond_curves: BTreeSet<(NaiveDate, &str, &str)> =
        bond_hazard.iter().map(|h| (h.date, &*h.entity, &*h.currency)).collect();
    let mut ran = vec![
        "input data quality".to_string(),
        "the daily CDS hazard-curve bootstrap with its repricing residuals".to_string(),
    ];
    let mut not_ran: Vec<String> = Vec::new();
    let stability_rows = readback::read_frame(&t.join("stability.parquet"))?.height();
    let backtest_rows = readback::read_frame(&t.join("backtest_buckets.parquet"))?.height();
    if stability_rows > 0 {
        ran.push("the parameter-stability review".into());
    } else {
        not_ran.push("the parameter-stability review".into());
    }
    if bond_curves.is_empty() {
        not_ran.push("bond-implied hazard curves".into());
    } else {
        ran.push(format!(
            "bond-implied hazard curves ({})",
            if basis.is_empty() { "with their price residuals" } else { "price residuals and the CDS-bond basis" }
        ));
    }
    if params.is_empty() {
        not_ran.push("the intensity-model (CIR) fits".into());
    } else {
        let modes: BTreeSet<&str> = params.iter().map(|p| p.mode).collect();
        ran.push(format!(
            "the CIR intensity fit per CDS curve ({} mode)",
            modes.into_iter().collect::<Vec<_>>().join(", ")
        ));
    }
    if backtest_rows > 0 {
        ran.push("the backtest of implied against realised default rates with the risk premium".into());
    } else {
        not_ran.push("the backtest of implied against realised default rates".into());
    }
    let list = |v: &[String]| match v.len() {
        0 => String::new(),
        1 => v[0].clone(),
        n => format!("{} and {}", v[..n - 1].join(", "), v[n - 1]),
    };
    let mut not_text = list(&not_ran);
    if let Some(first) = not_text.get_mut(..1) {
        first.make_ascii_uppercase();
    }
    if not_ran.is_empty() {
        let _ = writeln!(w, "- Scope of this run: {}.\n", list(&ran));
    } else {
        let _ = writeln!(
            w,
            "- Scope of this run: {}. {not_text} {} not part of this run.\n",
            list(&ran),
            if not_ran.len() == 1 { "is" } else { "are" }
        );
    }
    let _ = writeln!(w, "| check | result | status |\n| --- | --- | --- |");
    let _ = writeln!(
        w,
        "| every input row used or rejected with a reason | {} tables | {} |",
        m.counts.iter().filter(|c| c.stage == "calibrate").count(),
        if accounting_ok { "pass" } else { "FAIL" }
    );
    let rej_total: u64 = m.counts.iter().filter(|c| c.stage == "calibrate").map(|c| c.rejected).sum();
    let in_total: u64 = m.counts.iter().filter(|c| c.stage == "calibrate").map(|c| c.rows_in).sum();
    let _ = writeln!(
        w,
        "| rows rejected | {rej_total} of {in_total} ({}) | {} |",
        share(rej_total, in_total),
        if rej_total == 0 { "pass" } else { "see section 2" }
    );
    let _ = writeln!(
        w,
        "| curves with every node calibrated | {} of {} ({}) | {} |",
        n_curves - n_bad_curves,
        n_curves,
        share((n_curves - n_bad_curves) as u64, n_curves as u64),
        if n_bad_curves == 0 { "pass" } else { "flagged" }
    );
    let _ = writeln!(
        w,
        "| calibrated quotes repricing within {tolerance_bp:e} bp | {within} of {} ({}) | {} |",
        ok_res,
        share(within as u64, ok_res as u64),
        if within == ok_res { "pass" } else { "flagged" }
    );
    if !bond_curves.is_empty() {
        let bad_bond: BTreeSet<(NaiveDate, &str, &str)> = bond_hazard
            .iter()
            .filter(|h| h.status != RowStatus::Ok)
            .map(|h| (h.date, &*h.entity, &*h.currency))
            .collect();
        let _ = writeln!(
            w,
            "| bond-implied curves with every node `ok` | {} of {} | {} |",
            bond_curves.len() - bad_bond.len(),
            bond_curves.len(),
            if bad_bond.is_empty() { "pass" } else { "flagged" }
        );
    }
    if !params.is_empty() {
        let ok = params.iter().filter(|p| p.status == RowStatus::Ok).count();
        let _ = writeln!(
            w,
            "| CIR fits converged (status `ok`) | {ok} of {} ({}) | {} |",
            params.len(),
            share(ok as u64, params.len() as u64),
            if ok == params.len() { "pass" } else { "see section 3" }
        );
    }
    let dq_flags = flags.iter().filter(|f| f.stage == DATA_QUALITY).count();
    let _ = writeln!(
        w,
        "| data-quality flags (rows kept) | {dq_flags} | {} |",
        if dq_flags == 0 { "pass" } else { "see section 6" }
    );
    let st_flags: Vec<&FlagRecord> = flags.iter().filter(|f| f.stage == STABILITY).collect();
    let st_red = st_flags.iter().filter(|f| f.flag.severity == Severity::Red).count();
    let _ = writeln!(
        w,
        "| stability and residual flags | {} ({st_red} red) | {} |",
        st_flags.len(),
        if st_flags.is_empty() { "pass" } else { "see sections 4 and 6" }
    );
    if backtest_rows > 0 {
        let setting =
            |k: &str| settings.backtest_settings.iter().find(|(n, _)| n == k).map_or(String::new(), |(_, v)| v.clone());
        let verdicts = super::verdicts_section::read_verdicts(&t)?;
        super::verdicts_section::summary_rows(w, &verdicts, &setting("zone_yellow"), &setting("zone_red"));
    }
    let _ = writeln!(w);
    super::findings::findings_section(w, &flags);

    // 2. Data quality
    let _ = writeln!(w, "## 2. Data quality\n");
    let _ = writeln!(w, "Every input row is either used or rejected with a reason code; the identity rows in = used + rejected holds for every table after each stage.\n");
    let _ = writeln!(
        w,
        "| stage | table | rows in | used | rejected | flagged |\n| --- | --- | ---: | ---: | ---: | ---: |"
    );
    for c in &m.counts {
        let _ =
            writeln!(w, "| {} | {} | {} | {} | {} | {} |", c.stage, c.table, c.rows_in, c.used, c.rejected, c.flagged);
    }
    if reasons.is_empty() {
        let _ = writeln!(w, "\nNo rows were rejected.\n");
    } else {
        let _ = writeln!(
            w,
            "\nReject reasons (all rows are listed with file, row and detail in `tables/rejects.parquet`):\n"
        );
        let _ = writeln!(w, "| table | reason | rows |\n| --- | --- | ---: |");
        for (t, r, n) in &reasons {
            let _ = writeln!(w, "| {t} | `{r}` | {n} |");
        }
        let _ = writeln!(w);
    }

    // 3. Calibration and residuals
    let _ = writeln!(w, "## 3. Calibration and residuals\n");
    let _ = writeln!(w, "Hazard curves are bootstrapped per (date, entity, currency, seniority, documentation clause) from the standard-contract CDS quotes; every calibrated quote is then repriced on its curve by an independent pass of the leg pricer.\n");
    if hz.tiers.keys().any(|(_, tier)| !tier.is_empty()) {
        let _ = writeln!(w, "CDS curves by currency and tier (seniority/documentation clause; `-` where the quotes give none). Where a name is quoted in several tiers on a date, the bond basis, the CIR fit and the backtest use its reference tier (the seniority order of section 7); the stability series keep each tier apart, as `entity/currency/tier`.\n");
        let _ = writeln!(w, "| currency | tier | curves | entities |\n| --- | --- | ---: | ---: |");
        for ((ccy, tier), (curves, names)) in &hz.tiers {
            let tier = if tier.is_empty() { "-".to_string() } else { cell_text(tier) };
            let _ = writeln!(w, "| {} | {tier} | {curves} | {} |", cell_text(ccy), names.len());
        }
        let _ = writeln!(w);
    }
    discount_sources(w, &t)?;
    let _ = writeln!(w, "| node status | nodes |\n| --- | ---: |");
    for (s, n) in status_counts {
        let _ = writeln!(w, "| `{s}` | {n} |");
    }
    let _ = writeln!(w);
    // Residuals per tenor.
    let by_tenor = &rs.by_tenor;
    if !by_tenor.is_empty() {
        let _ = writeln!(w, "Residuals (model minus market, bp) of nodes with status `ok`, per tenor:\n");
        let _ = writeln!(w, "| tenor | quotes | mean | RMSE | largest abs |\n| --- | ---: | ---: | ---: | ---: |");
        for ((_, t), v) in by_tenor {
            let n = v.n as f64;
            let (mean, rmse) = (v.sum / n, (v.sum_sq / n).sqrt());
            let _ = writeln!(w, "| {t} | {} | {mean:.2e} | {rmse:.2e} | {:.2e} |", v.n, v.max_abs);
        }
        let _ = writeln!(w);
    }
    let worst = &rs.worst;
    if !worst.is_empty() {
        let _ = writeln!(w, "Largest residuals (all statuses):\n");
        let _ = writeln!(w, "| date | entity | tenor | status | market | model | residual (bp) |\n| --- | --- | --- | --- | ---: | ---: | ---: |");
        for r in worst {
            let _ = writeln!(
                w,
                "| {} | {} | {} | `{}` | {:.4} | {:.4} | {:.3e} |",
                r.date,
                cell_text(&r.entity),
                cell_text(&r.tenor_or_bond),
                r.status.as_str(),
                r.market,
                r.model,
                r.residual_bp
            );
        }
        let _ = writeln!(w);
    }
    let bad = &hz.bad_first;
    if !bad.is_empty() {
        let _ = writeln!(w, "Nodes not calibrated as quoted (first {} of {}):\n", bad.len(), hz.bad_nodes);
        let _ = writeln!(w, "| date | entity | tenor | status | detail |\n| --- | --- | --- | --- | --- |");
        for h in bad {
            let _ = writeln!(
                w,
                "| {} | {} | {} | `{}` | {} |",
                h.date,
                cell_text(&h.entity),
                cell_text(&h.tenor),
                h.status.as_str(),
                h.detail.clone().unwrap_or_default().replace('|', "/")
            );
        }
        let _ = writeln!(w);
    }
    if !rs.quote_types.is_empty() {
        let conversions = if t.join("cds_quote_conversions").is_dir() {
            "tables/cds_quote_conversions/"
        } else {
            "tables/cds_quote_conversions.parquet"
        };
        let _ = writeln!(w, "Every calibrated quote in the three conventions (`{conversions}`: the par spread and the upfront at the currency's standard coupon on its curve, and the quoted spread, the par spread of the flat hazard that gives that upfront), by the type it was quoted as; the quoted spread differs from the par spread as far as the curve is from flat:\n");
        let _ = writeln!(w, "| quoted as | quotes | mean abs quoted - par spread (bp) | largest (bp) | no flat hazard |\n| --- | ---: | ---: | ---: | ---: |");
        for (kind, (n, none, sum, max)) in &rs.quote_types {
            let with = n - none;
            let mean = if with > 0 { format!("{:.3}", sum / with as f64) } else { "-".into() };
            let _ = writeln!(w, "| `{kind}` | {n} | {mean} | {max:.3} | {none} |");
        }
        let _ = writeln!(w);
    }
    sensitivity_summary(w, &sensitivities, &settings_sensitivity_dates(&m));
    drop(sensitivities);

    // Figures.
    let mut figure = 0;
    let chart_err = Error::Chart;
    let chosen = charted(&settings, entities);
    let tdates = term_dates(&settings, &dates);
    let charted_nodes = hz.charted(&readback::table_path(&t, "hazard_curves"), &chosen, &tdates)?;
    let stems = unique_stems(&chosen);
    for e in &chosen {
        let mut curves_of: Vec<(NaiveDate, Vec<(f64, f64)>)> = Vec::new();
        for d in &tdates {
            if let Some(nodes) = charted_nodes.term.get(&(e.clone(), *d)) {
                curves_of.push((*d, nodes.clone()));
            }
        }
        if curves_of.is_empty() {
            continue;
        }
        let file = format!("term-structure-{}.svg", stems[e]);
        let svg = charts::term_structure(&format!("Hazard term structure: {e}"), &curves_of).map_err(chart_err)?;
        write_text(&charts_dir.join(&file), &svg)?;
        figure += 1;
        let _ = writeln!(w, "![Hazard term structure of {}](charts/{file})\n", cell_text(e));
        let _ = writeln!(
            w,
            "*Figure {figure}. Bootstrapped piecewise-flat hazard rate of {} against time to each node, on {}.*\n",
            cell_text(e),
            curves_of.iter().map(|c| c.0.to_string()).collect::<Vec<_>>().join(", ")
        );
    }
    // 5Y hazard through time with the universe band.
    if !hz.five_year.is_empty() {
        let mut per_date = hz.five_year.clone();
        let band = quantile_band(&mut per_date);
        let series: Vec<(String, Vec<(f64, f64)>)> = chosen
            .iter()
            .map(|e| (e.clone(), charted_nodes.five_year.get(e).cloned().unwrap_or_default()))
            .filter(|(_, v): &(String, Vec<(f64, f64)>)| !v.is_empty())
            .collect();
        let slots = colour_slots(&chosen, series.iter().map(|(e, _)| e.as_str()));
        let svg = charts::history_with_band(
            "5Y hazard rate through time",
            "hazard rate (% per year)",
            &series,
            &band,
            &slots,
        )
        .map_err(chart_err)?;
        write_text(&charts_dir.join("hazard-5y-history.svg"), &svg)?;
        figure += 1;
        let _ = writeln!(w, "![5Y hazard through time](charts/hazard-5y-history.svg)\n");
        let _ = writeln!(w, "*Figure {figure}. Hazard rate of the segment ending at the 5Y node, per curve date, for the charted entities, over the universe's 10%-90% range (shaded) and median (grey line).*\n");
    }
    let logs = &rs.logs;
    if !logs.is_empty() {
        let svg =
            charts::histogram("Repricing residuals", "log10 |model - market| (bp)", logs, 30).map_err(chart_err)?;
        write_text(&charts_dir.join("residual-histogram.svg"), &svg)?;
        figure += 1;
        let _ = writeln!(w, "![Residual histogram](charts/residual-histogram.svg)\n");
        let _ = writeln!(w, "*Figure {figure}. Distribution of the absolute repricing residuals of all repriced quotes on a log scale (residuals below 1e-16 bp are shown at -16), with the count on a log scale too, so that a handful of misfits shows beside a million exact fits. Floored nodes, if any, sit far to the right.*\n");
    }

    super::sections::residual_section(w, &t, &charts_dir, &mut figure)?;
    // A large table may be a folder of files (`report.large_tables`).
    let shown = |n: &str| if t.join(n).is_dir() { format!("tables/{n}/") } else { format!("tables/{n}.parquet") };
    let large = (shown("hazard_curves"), shown("calibration_residuals"));
    intensity_sections(
        w,
        bond_hazard,
        &bond_res,
        &basis,
        &params,
        &settings,
        &charts_dir,
        &mut figure,
        &large,
        &chosen,
    )?;

    super::sections::stability_section(w, &t, &charts_dir, &mut figure, 4, &settings.stability_settings)?;
    let base_recovery = settings.recovery;
    let backtest_enabled = settings.backtest_enabled(&manifest_path)?;
    super::sections::backtest_section(
        w,
        &t,
        &charts_dir,
        &mut figure,
        5,
        base_recovery,
        backtest_enabled,
        &settings.backtest_settings,
        m.period.as_ref().map(|p| p.1.as_str()),
    )?;

    // 6. Flags
    let _ = writeln!(w, "## 6. Flags\n");
    if flags.is_empty() {
        let _ = writeln!(w, "No flags were raised.\n");
    } else {
        let _ = writeln!(w, "Flags do not remove data; each points to the entity, series and date it concerns (`tables/flags.parquet`, with the source file and row).\n");
        let _ = writeln!(w, "| stage | rule | severity | count |\n| --- | --- | --- | ---: |");
        for ((st, r, s), n) in &flag_counts {
            let _ = writeln!(w, "| {st} | `{r}` | {s} | {n} |");
        }
        let rank = |s: Severity| match s {
            Severity::Red => 0,
            Severity::Amber | Severity::Warning => 1,
            Severity::Info => 2,
        };
        let mut top: Vec<&FlagRecord> = flags.iter().collect();
        top.sort_by_key(|f| (rank(f.flag.severity), f.stage != STABILITY));
        // At most three per rule, so that one noisy rule does not hide the others.
        let mut per_rule: BTreeMap<&str, usize> = BTreeMap::new();
        let top: Vec<&&FlagRecord> = top
            .iter()
            .filter(|f| {
                let n = per_rule.entry(f.flag.rule.as_str()).or_default();
                *n += 1;
                *n <= 3
            })
            .collect();
        let _ = writeln!(w, "\nTop flags (red first, at most three per rule; every flag is in `tables/flags.parquet`):\n\n| rule | severity | entity | series | period | date | explanation |\n| --- | --- | --- | --- | --- | --- | --- |");
        for f in top.iter().take(30) {
            let g = &f.flag;
            let _ = writeln!(
                w,
                "| `{}` | {} | {} | {} | {} | {} | {} |",
                g.rule.as_str(),
                g.severity.as_str(),
                cell_text(g.entity.as_deref().unwrap_or("")),
                cell_text(&g.series),
                g.period,
                g.date.map(|d| d.to_string()).unwrap_or_default(),
                cell_text(&g.explanation.replace('|', "/"))
            );
        }
        let _ = writeln!(w, "\nRed flags: {red}.\n");
    }

    // 7. Method notes
    let s = &settings;
    let q = &s.quality;
    // The bounds the fit stage uses (its settings are the core's defaults).
    let cir = CirFitSettings::default().bounds;
    let _ = writeln!(w, "## 7. Method notes\n");
    let _ = writeln!(w, "- Contract: the standard single-name CDS (quarterly premium on the 20th of Mar/Jun/Sep/Dec adjusted Following, maturities on the semi-annual roll, Act/360 accrual with the maturity day in the last period, accrual paid on default, protection from T + 1, cash settlement T + 3 business days). Legs are integrated in closed form on the joint grid of discount and hazard nodes (accrual on default: {} integration), with the series expansion below an exponent of 1e-4; the independent reference is QuantLib's standard-model engine (tests/reference/).", s.accrual_on_default.as_str());
    let _ = writeln!(w, "- Discount curves: from the discount table, pillars by tenor (the curve date plus calendar months) or by date, each with a zero rate ({} compounding, {} day count) or a discount factor; where the discount table has no curve, the standard curve from the rate quotes (deposits and par swaps from spot, Modified Following, each currency's day counts and fixed frequency, solved pillar by pillar); log-linear discount factors on Act/365F between pillars, first rate before the first pillar, last forward after the last (every curve in `tables/discount_curves.parquet`).", s.zero_rate_compounding.as_str().replace('_', "-"), if s.zero_rate_day_count == crate::curves::RateDayCount::Act365F { "Act/365F" } else { "Act/360" });
    let _ = writeln!(w, "- Bootstrap: hazard piecewise flat between contract maturities (segment end = adjusted maturity + 1 day), one safeguarded Newton root per node to 1e-14 in hazard. A quote needing a negative hazard is handled by the `{}` policy; a quote no hazard up to 10,000 per year can reach stops its curve.", s.infeasible.as_str());
    let by_sen =
        Some(s.recovery_by_seniority.iter().map(|(k, v)| format!("{k}: {}", pct(*v))).collect::<Vec<_>>().join(", "))
            .filter(|t| !t.is_empty())
            .unwrap_or_else(|| "none listed".into());
    let _ = writeln!(
        w,
        "- Recovery: {} unless the quote carries one or its seniority is listed (by seniority: {by_sen}).",
        pct(s.recovery)
    );
    let _ = writeln!(
        w,
        "- Tiers: seniority and documentation clause are part of the curve key. Seniority order for a name's reference tier: {} (unlisted seniorities after the listed ones in name order, an absent seniority first; then the documentation clause in name order).",
        if s.seniority_order.is_empty() { "none listed".to_string() } else { cell_text(&s.seniority_order.join(", ")) }
    );
    let _ = writeln!(w, "- Sensitivities: each curve of a sensitivity date is bootstrapped again from scratch with one change: every quote +1 bp (a par spread +1 bp; an upfront, a converted quoted spread included, + 1 bp x its contract's risky annuity on the unshifted curve); every recovery +5 and -5 points (refused as `out_of_range` outside [0, 1)); every discount zero rate +1 bp (continuously compounded, each pillar's ln DF - 1e-4 t); the accrual variants `standard` and `exact`; the other infeasible policy. Measures: 1Y PD 1 - S(1Y), 5Y hazard h(5Y), and the clean upfront of the standard 5Y contract at the currency's standard coupon (100 bp unless `conventions.standard_coupon_bp` lists one), per unit notional.");
    let _ = writeln!(w, "- Data-quality thresholds in force: spread floor {} bp and cap {} bp; zero-rate band {}; bond price band {}; stale after {} unchanged business days; spike when the robust z-score (median and 1.4826 x MAD of the series' daily log changes) exceeds {} with a log move above {} reverting by at least {} the next day; unit slip when {} or more consecutive quotes sit {} times above or below the series median or the median of the 10 quotes on each side; fewer than {} tenors flags a curve (common practice, no single source).",
        q.min_spread_bp.as_ref().map_or_else(|| "(not recorded)".to_string(), |v| v.to_string()),
        q.max_spread_bp,
        band(&q.zero_rate_band),
        band(&q.bond_price_band),
        q.stale_days,
        q.spike_z,
        q.spike_min_log_move,
        q.spike_revert_share,
        q.unit_slip_min_run,
        q.unit_slip_ratio,
        q.min_tenors);
    if !bond_hazard.is_empty() {
        let _ = writeln!(w, "- Bond-implied curves: least squares on clean prices (settlement T + 0, no ex-coupon period), each residual weighted by 1e4 / (dirty price x modified duration), i.e. bp of yield to first order; piecewise-flat hazard with a node at each bond maturity (maturities within half a year share one) when there are three or more nodes, the two-parameter form l + (s - l) exp(-t / 3y) with two, a flat hazard with one; hazards bounded to [0, 5] per year. Recovery convention `{}`, recovery by the bonds' seniority as for CDS quotes. The basis prices a CDS to each bond maturity on both curves with the same recovery.", s.bond_recovery_convention.as_str());
    }
    if !params.is_empty() {
        let _ = writeln!(w, "- CIR intensity: survival from the affine closed form; the CDS legs priced through it on a monthly protection grid; projected Levenberg-Marquardt on the quotes' residuals in bp of running spread, kappa in {}, theta in {}, sigma in {}, lambda0 in {} (per year). Starts: the day's bootstrapped curve and the previous day's solution, the better of the two. Mode `{}`{}.", bounds(cir.kappa), bounds(cir.theta), bounds(cir.sigma), bounds(cir.lambda0), s.cir_mode.as_str(), if s.cir_mode == CirFitMode::FixedKappaSigma { format!(": kappa and sigma estimated on the pooled quotes of consecutive windows of {} curve dates, theta and lambda0 fitted daily", s.cir_window) } else { String::new() });
    }
    let pairs = |list: &[(String, String)]| -> String {
        list.iter().map(|(k, v)| format!("{k} = {v}")).collect::<Vec<_>>().join("; ")
    };
    let _ = writeln!(w, "- Backtest: implied PD 1 - S(h) from the member's latest curve within the look-back (used as of its own date); outcome a default in (t, t + h], observed to the outcome end for every entity (the defaults table covers entities whether or not they are quoted), censored only where the entity's coverage ends (defaulters and survivors alike); a cohort whose horizon ends after the outcome end is incomplete at that horizon: listed, and outside every bucket, Hosmer-Lemeshow, discrimination and premium row (the term structure uses the years it was observed). Realised rates d / n, or Kaplan-Meier (1958) with Greenwood's (1926) variance and a log-log-transform interval where members were censored. Clopper-Pearson exact, Jeffreys (lower bound 0 when d = 0, upper 1 when d = n; Brown, Cai and DasGupta, 2001) and Wilson intervals; binomial tails P[D >= d] and P[D <= d] computed directly, never as 1 - cdf, each with its zone (the upper tail says the PD is too low, the risk finding; the lower tail that it is too high, the premium); the Jeffreys test p-value is the Beta(d + 1/2, n - d + 1/2) cdf at the mean implied PD (small when the PD is too low). Correlated defaults: the one-factor Gaussian (Vasicek) count distribution with asset correlation rho (a setting; by default the supervisory corporate formula of the bucket's one-year PD: Basel Committee, International Convergence of Capital Measurement and Capital Standards, June 2006, paragraph 272), both tails and the central interval of the default rate. Hosmer-Lemeshow with k degrees of freedom for k given forecasts (Basel Committee working paper 14, 2005; its chi-square approximation is poor where a bucket expects under about one default); Spiegelhalter (1986) z and the Brier score over members; Herfindahl-Hirschman index of the members over buckets. Discrimination: AUC with ties counted one half, DeLong, DeLong and Clarke-Pearson (1988) standard error and interval, Gini = 2 AUC - 1, the p-value of no power from the Mann-Whitney variance under that hypothesis (tie corrected), the paired DeLong test of implied PD against grade, and with a reference run the test of each pooled AUC against the reference's (independent samples). Migration: one-year cohort-method matrices from the grades table. Long-history premium: lambda_Q of the quoted period against -ln(1 - d / n) of the cohort history, with Clopper-Pearson bounds carried through. Term structure: Kaplan-Meier over every cohort, complete or not, with the one-sample log-rank test (Breslow, 1975) of observed against expected defaults, exact under Poisson; overlapping cohorts count a default once per cohort whose window holds it, so these p-values treat dependent windows as independent and are descriptive. Verdicts: one status per family (table `backtest_verdicts`): pass only when none of its tests has p below zone_yellow; a family holds many overlapping tests and no adjustment for multiplicity is made. Garwood (1936) exact Poisson interval for the historical intensity. Every bucket, interval, AUC, term-structure row and ratio can be recomputed from `tables/backtest_members.parquet` (one row per member, horizon and recovery: curve date, implied PD, outcome, event date, exposure, integrated hazard); the cohort-history rows come from `cohort_history` and the migration matrices from the grades table. Settings in force: {}.", pairs(&s.backtest_settings));
    let _ = writeln!(w, "- Stability: per review period and series (per entity, per grade, universe): mean, standard deviation, coefficient of variation, largest daily move, share of large daily moves, failures, period-on-period change of the mean and median, and the parameter's daily relative move against the spreads'. PSI = sum (a - e) ln(a / e) over buckets with an empty bucket's share replaced by psi_epsilon, thresholds 0.10 and 0.25 (common practice, no single source); structural breaks by the OLS-residual CUSUM (Ploberger and Kramer, 1992) scaled by the Newey-West long-run standard deviation (Bartlett weights, Andrews' 1991 AR(1) bandwidth), so that a persistent series is not read as a break, with its Kolmogorov p-value (amber below the level, red below 1%), on the levels, or on the daily changes where the augmented Dickey-Fuller test (MacKinnon 2010 critical value at 5%) keeps a unit root and the changes' lag-1 autocorrelation is above -0.25 (not over-differenced); the CIR fits' identification by the scaled condition number of the Jacobian (Belsley, Kuh and Welsch, 1980) and Gauss-Newton standard errors. Every threshold in force: {}.", pairs(&s.stability_settings));
    {
        let defaults = crate::stability::StabilitySettings::default().pairs();
        let differing: Vec<String> = settings
            .stability_settings
            .iter()
            .filter(|(k, v)| k != "worst_n" && !defaults.iter().any(|(dk, dv)| dk == k && dv == v))
            .map(|(k, v)| format!("{k} = {v}"))
            .collect();
        let _ = writeln!(w, "{}", super::flag_notes::method_note(&differing));
    }
    let _ = writeln!(w, "- Reproducibility: the tables and this report (`report.md`, and `report.html` with the figures inline for a browser and for print) are deterministic for the same inputs, pipeline file and build (the source revision above); timings are in `run.log`, not here.\n");
    let _ = writeln!(w, "## 8. Caution\n\n{CAUTION} Every conclusion should be checked against the data and these method notes before it is relied on.");
    write_text(&run_dir.join("report.md"), &md)?;
    // The same document as one self-contained page: figures inline, a table of contents, print
    // styles.
    let charts = run_dir.to_path_buf();
    let html = super::html::render_html(&md, &|path: &str| {
        // Only figures inside the run folder's charts/ are inlined.
        let p = std::path::Path::new(path);
        let inside = p.starts_with("charts") && p.components().all(|c| matches!(c, std::path::Component::Normal(_)));
        inside.then(|| std::fs::read_to_string(charts.join(p)).ok()).flatten()
    });
    write_text(&run_dir.join("report.html"), &html)
}

#[cfg(test)]
mod share_tests {
    use super::share;

    #[test]
    fn a_shortfall_never_reads_full_and_a_part_never_reads_zero() {
        assert_eq!(share(303_358, 303_387), "99.99%");
        assert_eq!(share(303_387, 303_387), "100.0%");
        assert_eq!(share(1, 2_427_452), "0.00004%");
        assert_eq!(share(0, 10), "0.0%");
        assert_eq!(share(1, 3), "33.3%");
        assert_eq!(share(3, 0), "-");
    }
}

#[cfg(test)]
mod tests {
    /// One entity, one colour: the 5Y hazard figure draws the charted names in their order, the
    /// CIR figure a subset of them and one more, in name order; the shared names keep their slot.
    #[test]
    fn an_entity_keeps_its_colour_slot_across_figures() {
        let charted: Vec<String> = ["Salilvane Power", "Salilford Mills", "Orvurstead Power"].map(String::from).into();
        let five_year = super::colour_slots(&charted, charted.iter().map(String::as_str));
        assert_eq!(five_year, [0, 1, 2]);
        let cir = super::colour_slots(&charted, ["Orvurstead Power", "Alder Works", "Salilvane Power"].into_iter());
        assert_eq!(cir, [2, 3, 0]);
    }

    #[test]
    fn figure_names_of_names_that_differ_in_case_or_punctuation_do_not_collide() {
        let names: Vec<String> =
            ["Alder Works", "ALDER-WORKS", "Birch Foods", "***"].iter().map(|s| s.to_string()).collect();
        let stems = super::unique_stems(&names);
        let distinct: std::collections::BTreeSet<&String> = stems.values().collect();
        assert_eq!(distinct.len(), 4, "{stems:?}");
        assert_eq!(stems["Birch Foods"], "birch-foods", "a name that collides with none keeps its plain stem");
        assert!(stems["Alder Works"].starts_with("alder-works-") && stems["***"].starts_with('-'), "{stems:?}");
    }
}

#[cfg(test)]
mod escaping {
    #[test]
    fn data_text_cannot_end_a_cell_or_open_a_link_tag_or_code_span() {
        assert_eq!(super::cell_text("Alder Works"), "Alder Works");
        assert_eq!(super::cell_text("A|B <script>![x](http://h)`c`"), "A\\|B &lt;script&gt;!\\[x\\](http://h)\\`c\\`");
        assert_eq!(super::cell_text("a_b*c\\d\te"), "a_b*c\\\\d e");
    }
}
