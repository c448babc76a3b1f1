//! The parts of the backtest section that say what the tests conclude: the verdict of each
//! test family (also in the summary), the incomplete cohorts, the one-factor (correlated
//! defaults) bucket tests, and discriminatory power with its ROC and CAP figures. Everything
//! here is read back from the run's tables: `backtest_verdicts`, `backtest_buckets`,
//! `backtest_discrimination` and, for the curves, `backtest_members`.

use super::charts;
use super::sections::{bucket_order, opt, pct, save_chart, sci};
use crate::backtest::{DiscriminationRow, Score, Status, VerdictRow};
use crate::error::Result;
use crate::tables::parts::MemberRecord;
use crate::tables::{self, BucketRecord, DiscriminationRecord};
use std::collections::{BTreeMap, BTreeSet};
use std::fmt::Write as _;
use std::path::Path;

/// The verdict rows of a run, if the backtest wrote them.
pub fn read_verdicts(tables_dir: &Path) -> Result<Vec<VerdictRow>> {
    let path = tables_dir.join("backtest_verdicts.parquet");
    if !path.exists() {
        return Ok(Vec::new());
    }
    tables::read_from::<VerdictRow>(&path)
}

/// The status as the section prints it: the documented value, with what it means where every
/// rejection says the PD is too high (the premium this review measures, not a shortfall).
pub fn status_text(v: &VerdictRow) -> String {
    match v.status {
        Status::Pass | Status::NotTested => v.status.as_str().to_string(),
        s if v.family.starts_with("discrimination") => format!("{}: ranking not shown", s.as_str()),
        s if v.only_over_prediction() => format!("{}: over-prediction only (the premium)", s.as_str()),
        s => format!("{}: includes under-prediction (PD too low)", s.as_str()),
    }
}

/// One summary row per test family.
pub fn summary_rows(w: &mut String, verdicts: &[VerdictRow], yellow: &str, red: &str) {
    for v in verdicts {
        let _ = writeln!(
            w,
            "| backtest: {} | {} of {} tests below p = {yellow} ({} below {red}); {} p {}{} | {} |",
            v.family,
            v.against,
            v.tests,
            v.strongly_against,
            if v.family.starts_with("discrimination") { "largest no-power" } else { "smallest" },
            opt(v.extreme_p, sci),
            v.note.as_deref().map_or(String::new(), |n| format!("; {n}")),
            match v.status {
                Status::Pass | Status::NotTested => status_text(v),
                _ => format!("{} (see section 5)", status_text(v)),
            }
        );
    }
}

/// The verdict table of the section, with what a rejection means in each family.
pub fn verdict_table(w: &mut String, verdicts: &[VerdictRow], yellow: &str, red: &str) {
    if verdicts.is_empty() {
        return;
    }
    let _ = writeln!(w, "### Verdicts by test family\n\nA family passes only when none of its tests rejects at p < {yellow}; it needs attention when some do and none at p < {red}, and fails when one does. For discrimination a test counts against the model when the AUC is not shown above 1/2 (p of \"no power\" at or above {yellow}). The lower-tail families measure over-prediction: a rejection there says the pricing-measure PD exceeds the realised rate, which is the risk premium this section quantifies, and is reported, not hidden. A family holds many overlapping tests (per cohort year and pooled) and no adjustment for multiplicity is made: read its count of rejections against its number of tests.\n");
    let _ = writeln!(w, "| family | a rejection means | tests | rejecting (p < {yellow}) | of which p < {red} | extreme p | status | direction of the rejections |\n| --- | --- | ---: | ---: | ---: | ---: | --- | --- |");
    for v in verdicts {
        let _ = writeln!(
            w,
            "| {} | {} | {} | {} | {} | {} | {} | {} |",
            v.family,
            v.reading,
            v.tests,
            v.against,
            v.strongly_against,
            opt(v.extreme_p, sci),
            status_text(v),
            v.note.as_deref().unwrap_or("")
        );
    }
    let _ = writeln!(w);
}

/// The cohorts left untested at a horizon because it ends after the outcome end.
pub fn incomplete_cohorts(w: &mut String, base: &[&BucketRecord], outcome_end: Option<&str>) {
    let mut by: BTreeMap<(u32, &str), u64> = BTreeMap::new();
    for b in base.iter().filter(|b| b.row.cohort != "all") {
        *by.entry((b.row.horizon_years, b.row.cohort.as_str())).or_default() += b.row.n_incomplete;
    }
    let listed: Vec<String> =
        by.iter().filter(|(_, n)| **n > 0).map(|((h, c), n)| format!("{c} at {h}Y ({n} members)")).collect();
    let end = outcome_end.map_or(String::new(), |e| format!(" ({e})"));
    if listed.is_empty() {
        let _ =
            writeln!(w, "Every cohort's horizons end on or before the outcome end{end}: no cohort is incomplete.\n");
    } else {
        let _ = writeln!(w, "Incomplete cohorts, whose horizon ends after the outcome end{end}: {}. Their members are listed in `tables/backtest_members.parquet` with outcome `incomplete` (and a default observed before the outcome end as its event date); they enter no bucket, Hosmer-Lemeshow, discrimination or premium row; the default term structure below uses the years they were observed.\n", listed.join(", "));
    }
}

/// The one-factor bucket tests of the pooled cohorts at one horizon.
pub fn one_factor_table(w: &mut String, rows: &[&BucketRecord], h: u32, level: f64) {
    let _ = writeln!(w, "### Correlated defaults (one-factor model), {h}Y horizon, all cohorts pooled\n\nThe binomial tests assume independent defaults; with asset correlation rho the count of defaults among n names of PD p follows the one-factor Gaussian (Vasicek) mixture, so the plausible range of the realised rate widens and both tails are computed under it (the zone reads the upper tail; the lower tail is the premium). The interval is the range of default rates inside the central {} of that distribution. rho is the setting `asset_correlation` (by default the supervisory corporate formula of the bucket's one-year PD: Basel Committee, June 2006, paragraph 272).\n", pct(level));
    let _ = writeln!(w, "| bucket | n | defaults | realised | mean implied PD | rho | plausible rate | P[D >= d] | P[D <= d] | zone (PD too low) |\n| --- | ---: | ---: | ---: | ---: | ---: | --- | ---: | ---: | --- |");
    for b in rows {
        let r = &b.row;
        let _ = writeln!(
            w,
            "| {} | {} | {} | {} | {} | {} | [{}, {}] | {} | {} | {} |",
            r.bucket,
            r.n,
            r.defaults,
            match r.rate_method {
                Some(crate::backtest::RateMethod::KaplanMeier) => format!("{} KM", opt(r.realised_rate, pct)),
                _ => opt(r.realised_rate, pct),
            },
            opt(r.implied_pd, pct),
            opt(r.rho, |v| format!("{v:.3}")),
            opt(r.vasicek_lo, pct),
            opt(r.vasicek_hi, pct),
            opt(r.p_vasicek_upper, sci),
            opt(r.p_vasicek_lower, sci),
            r.zone_vasicek.map_or("-", |z| z.as_str())
        );
    }
    let _ = writeln!(w);
}

/// The members a discrimination row ranks: counted by the bucket tests.
fn counted(m: &MemberRecord, survivor_policy: bool) -> Option<bool> {
    use crate::backtest::Outcome::*;
    match m.member.outcome {
        Defaulted => Some(true),
        Survived => Some(false),
        Censored if survivor_policy => Some(m.member.event_date.is_some()),
        Censored | Incomplete => None,
    }
}

/// Discriminatory power: the table, and ROC and CAP curves of the pooled cohorts per horizon
/// recomputed from the member table (their areas are checked against the table's AUC).
#[allow(clippy::too_many_arguments)]
pub fn discrimination_section(
    w: &mut String,
    tables_dir: &Path,
    charts_dir: &Path,
    figure: &mut usize,
    same: &dyn Fn(f64) -> bool,
    survivor_policy: bool,
) -> Result<()> {
    let path = tables_dir.join("backtest_discrimination.parquet");
    if !path.exists() {
        return Ok(());
    }
    let rows: Vec<DiscriminationRow> = tables::read_from::<DiscriminationRecord>(&path)?
        .into_iter()
        .filter(|r| same(r.recovery))
        .map(|r| r.row)
        .collect();
    if rows.is_empty() {
        return Ok(());
    }
    let level = rows[0].level;
    let _ = writeln!(w, "### Discriminatory power\n\nDoes the score rank the members that default above those that survive? AUC with ties counted one half, its DeLong standard error and {} interval (DeLong, DeLong and Clarke-Pearson, 1988), Gini = 2 AUC - 1, the one-sided p-value of \"no power\" (AUC <= 1/2, from the Mann-Whitney variance under that hypothesis, tie corrected, which the ranks bound even with few defaulters), and the paired DeLong test of the implied PD's AUC against the internal grade's on the same members.\n", pct(level));
    let with_reference = rows.iter().any(|r| r.auc_reference.is_some());
    if with_reference {
        let _ = writeln!(w, "The pooled rows are also tested against the reference run named by `backtest.reference_run` (its pooled AUC of the same score and horizon): z = (AUC - AUC_ref) / sqrt(se^2 + se_ref^2), two-sided, the two reviews taken as independent samples (approximate where their cohorts share names).\n");
    }
    let _ = writeln!(w, "| cohort | horizon | score | n | defaults | AUC | interval | Gini | p (no power) | p (implied PD vs grade) |{} note |\n| --- | ---: | --- | ---: | ---: | ---: | --- | ---: | ---: | ---: |{} --- |", if with_reference { " reference AUC | p (vs reference) |" } else { "" }, if with_reference { " ---: | ---: |" } else { "" });
    let mut sorted: Vec<&DiscriminationRow> = rows.iter().collect();
    sorted.sort_by_key(|r| (r.cohort != "all", r.cohort.clone(), r.horizon_years, r.score));
    for r in &sorted {
        let _ = writeln!(
            w,
            "| {} | {}Y | {} | {} | {} | {} | [{}, {}] | {} | {} | {} |{} {} |",
            r.cohort,
            r.horizon_years,
            r.score.as_str(),
            r.n,
            r.defaults,
            opt(r.auc, |v| format!("{v:.3}")),
            opt(r.auc_lo, |v| format!("{v:.3}")),
            opt(r.auc_hi, |v| format!("{v:.3}")),
            opt(r.gini, |v| format!("{v:.3}")),
            opt(r.p_no_power, sci),
            opt(r.p_vs_grade, sci),
            if with_reference {
                format!(" {} | {} |", opt(r.auc_reference, |v| format!("{v:.3}")), opt(r.p_vs_reference, sci))
            } else {
                String::new()
            },
            r.note.as_deref().unwrap_or("")
        );
    }
    let _ = writeln!(w);
    let members_path = tables_dir.join("backtest_members.parquet");
    if !members_path.exists() {
        return Ok(());
    }
    let members: Vec<MemberRecord> =
        tables::read_from::<MemberRecord>(&members_path)?.into_iter().filter(|m| same(m.recovery)).collect();
    // The tested horizons (the member table also holds the term-structure years).
    let horizons: BTreeSet<u32> = rows.iter().map(|r| r.horizon_years).collect();
    for h in horizons {
        let picked: Vec<(&MemberRecord, bool)> = members
            .iter()
            .filter(|m| m.member.horizon_years == h)
            .filter_map(|m| counted(m, survivor_policy).map(|d| (m, d)))
            .collect();
        let outcome: Vec<bool> = picked.iter().map(|p| p.1).collect();
        let pd: Vec<f64> = picked.iter().map(|p| p.0.member.implied_pd).collect();
        let Ok(pd_curves) = crate::stats::ranking_curves(&pd, &outcome) else { continue };
        let graded: Vec<(f64, bool)> =
            picked.iter().filter_map(|(m, d)| m.member.grade.map(|g| (f64::from(g), *d))).collect();
        let grade_curves = crate::stats::ranking_curves(
            &graded.iter().map(|g| g.0).collect::<Vec<_>>(),
            &graded.iter().map(|g| g.1).collect::<Vec<_>>(),
        )
        .ok();
        let table_auc = |score: Score| {
            rows.iter().find(|r| r.cohort == "all" && r.horizon_years == h && r.score == score).and_then(|r| r.auc)
        };
        let mut roc = vec![("implied PD".to_string(), pd_curves.roc.clone())];
        let mut cap = vec![("implied PD".to_string(), pd_curves.cap.clone())];
        let mut check = format!(
            "area under the implied-PD curve drawn {} (table: {})",
            format_args!("{:.6}", crate::stats::area_under(&pd_curves.roc)),
            opt(table_auc(Score::ImpliedPd), |v| format!("{v:.6}"))
        );
        if let Some(g) = &grade_curves {
            roc.push(("grade".to_string(), g.roc.clone()));
            cap.push(("grade".to_string(), g.cap.clone()));
            let _ = write!(
                check,
                "; grade {:.6} (table: {})",
                crate::stats::area_under(&g.roc),
                opt(table_auc(Score::Grade), |v| format!("{v:.6}"))
            );
        }
        let roc_name = format!("roc-{h}y.svg");
        let cap_name = format!("cap-{h}y.svg");
        let drew_roc = save_chart(
            charts_dir,
            &roc_name,
            charts::unit_square_curves(
                &format!("ROC, {h}Y, all cohorts pooled"),
                "share of survivors ranked riskier",
                "share of defaulters ranked riskier",
                &roc,
                None,
            ),
        )?;
        let drew_cap = save_chart(
            charts_dir,
            &cap_name,
            charts::unit_square_curves(
                &format!("CAP, {h}Y, all cohorts pooled"),
                "share of members, riskiest first",
                "share of defaulters captured",
                &cap,
                Some(("perfect ranking", pd_curves.cap_perfect.clone())),
            ),
        )?;
        if drew_roc {
            *figure += 1;
            let _ = writeln!(w, "![ROC {h}Y](charts/{roc_name})\n");
            let _ = writeln!(w, "*Figure {figure}. ROC curves of the implied PD and of the grade, {h}Y, over the {} members the pooled tests count ({} defaults), recomputed from `backtest_members`: {check}.*\n", picked.len(), outcome.iter().filter(|d| **d).count());
        }
        if drew_cap {
            *figure += 1;
            let _ = writeln!(w, "![CAP {h}Y](charts/{cap_name})\n");
            let _ = writeln!(w, "*Figure {figure}. Cumulative accuracy profiles of the same scores, {h}Y: the share of defaulters among the riskiest x of the members; the grey line is the perfect ranking, the dashed one a random one. The accuracy ratio (area above the diagonal over the perfect ranking's) equals the Gini coefficient.*\n");
        }
    }
    Ok(())
}

/// An interval cell: `[lo, hi]` in percent, `-` when it has no bound.
fn interval(lo: Option<f64>, hi: Option<f64>) -> String {
    if lo.is_none() && hi.is_none() {
        "-".into()
    } else {
        format!("[{}, {}]", opt(lo, pct), opt(hi, pct))
    }
}

/// The pooled bucket rows of the base recovery at horizon `h`, in bucket order.
pub fn pooled<'a>(base: &[&'a BucketRecord], h: u32) -> Vec<&'a BucketRecord> {
    let mut rows: Vec<&BucketRecord> =
        base.iter().copied().filter(|b| b.row.horizon_years == h && b.row.cohort == "all").collect();
    rows.sort_by_key(|b| bucket_order(&b.row.bucket));
    rows
}

/// The default term structure over every cohort: the table, and a figure of the Kaplan-Meier
/// cumulative default rate per bucket at the longest horizon, recomputed from the member table,
/// with the mean implied PDs of the configured horizons as circles.
pub fn term_structure_section(
    w: &mut String,
    tables_dir: &Path,
    charts_dir: &Path,
    figure: &mut usize,
    same: &dyn Fn(f64) -> bool,
) -> Result<()> {
    let path = tables_dir.join("backtest_term_structure.parquet");
    if !path.exists() {
        return Ok(());
    }
    let rows: Vec<crate::backtest::TermStructureRow> = tables::read_from::<crate::tables::TermStructureRecord>(&path)?
        .into_iter()
        .filter(|r| same(r.recovery))
        .map(|r| r.row)
        .collect();
    if rows.is_empty() {
        return Ok(());
    }
    let level = rows[0].level;
    let _ = writeln!(w, "### Default term structure over every cohort\n\nThe bucket tests above use only cohorts whose horizon ended by the outcome end. Here every member of every cohort counts, each observed from its cohort date until its default, the end of its coverage, the outcome end or its horizon end: the product-limit (Kaplan-Meier) cumulative default rate at each horizon with its Greenwood {} interval (log-log transform), against the mean implied PD of the same members. Annual cohorts overlap at horizons over a year, so one default counts once in every cohort whose window holds it: the tests below treat those dependent windows as independent and are descriptive. The test is the one-sample log-rank test (Breslow, 1975): the defaults observed in the members' windows against the number the implied curves expect over the same windows (E, the sum of each member's implied hazard integrated over its window), exactly under Poisson(E); P[O >= o] is small when the PD is too low (zone), P[O <= o] when it is too high (the premium). O / E is the realised-to-implied ratio of the windows observed.\n", pct(level));
    let _ = writeln!(w, "| bucket | horizon | members | survivors observed to the horizon end | realised (KM) | interval | mean implied PD | defaults O | expected E | O / E | P[O >= o] | P[O <= o] | zone (PD too low) | note |\n| --- | ---: | ---: | ---: | ---: | --- | ---: | ---: | ---: | ---: | ---: | ---: | --- | --- |");
    let mut sorted: Vec<&crate::backtest::TermStructureRow> = rows.iter().collect();
    sorted.sort_by_key(|r| (r.horizon_years, r.bucket == "all", bucket_order(&r.bucket)));
    for r in &sorted {
        let _ = writeln!(
            w,
            "| {} | {}Y | {} | {} | {} | {} | {} | {} | {} | {} | {} | {} | {} | {} |",
            r.bucket,
            r.horizon_years,
            r.members,
            r.at_risk_at_horizon,
            opt(r.realised_rate, pct),
            interval(r.rate_lo, r.rate_hi),
            opt(r.implied_pd, pct),
            r.defaults,
            opt(r.expected_defaults, |v| format!("{v:.2}")),
            opt(r.observed_to_expected, |v| format!("{v:.3}")),
            opt(r.p_upper, sci),
            opt(r.p_lower, sci),
            r.zone.map_or("-", |z| z.as_str()),
            r.note.as_deref().unwrap_or("")
        );
    }
    let _ = writeln!(w);
    // The figure: the members at the longest horizon, grouped by their bucket column.
    let members_path = tables_dir.join("backtest_members.parquet");
    if !members_path.exists() {
        return Ok(());
    }
    let Some(longest) = rows.iter().map(|r| r.horizon_years).max() else { return Ok(()) };
    let df = crate::tables::readback::read_frame(&members_path)?;
    let labels = crate::tables::readback::strs(&df, &members_path, "bucket")?;
    let members = tables::rows_of::<MemberRecord>(&df, &members_path)?;
    let mut groups: BTreeMap<String, Vec<&crate::backtest::Observation>> = BTreeMap::new();
    for (m, label) in members.iter().zip(&labels) {
        if same(m.recovery) && m.member.horizon_years == longest {
            groups.entry(label.clone().unwrap_or_default()).or_default().push(&m.member);
        }
    }
    let mut names: Vec<String> = groups.keys().cloned().collect();
    names.sort_by_key(|b| bucket_order(b));
    let mut series = Vec::new();
    for b in names {
        let steps = crate::backtest::survival_points(&groups[&b])
            .map_err(|e| crate::error::Error::Stage { stage: "report (term structure)", source: e.into() })?;
        let implied: Vec<(f64, f64)> = rows
            .iter()
            .filter(|r| r.bucket == b)
            .filter_map(|r| r.implied_pd.map(|p| (f64::from(r.horizon_years), p)))
            .collect();
        series.push((b, steps, implied));
    }
    let name = "default-term-structure.svg";
    if save_chart(
        charts_dir,
        name,
        charts::cumulative_rates(
            &format!("Cumulative default rate by bucket, every cohort, up to {longest}Y"),
            &series,
            &[],
        ),
    )? {
        *figure += 1;
        let _ = writeln!(w, "![Default term structure](charts/{name})\n");
        let _ = writeln!(w, "*Figure {figure}. Kaplan-Meier cumulative default rate per bucket over the members of every cohort at the {longest}Y horizon (lines, recomputed from `backtest_members`), and the members' mean implied cumulative PD at each year (circles, from `backtest_term_structure`), in the bucket's colour.*\n");
    }
    // One figure per bucket, with the Greenwood interval of the realised rate at each year.
    let first = *figure + 1;
    let mut drawn = Vec::new();
    for (b, steps, implied) in series {
        let whiskers: Vec<(f64, f64, f64)> = rows
            .iter()
            .filter(|r| r.bucket == b)
            .filter_map(|r| Some((f64::from(r.horizon_years), r.rate_lo?, r.rate_hi?)))
            .collect();
        let file = format!("default-term-structure-{}.svg", b.replace([' ', '[', ']', '(', ')', ','], "-"));
        let title = format!("{b}: cumulative default rate, every cohort");
        if save_chart(charts_dir, &file, charts::cumulative_rates(&title, &[(b.clone(), steps, implied)], &[whiskers]))?
        {
            *figure += 1;
            drawn.push((b, file));
        }
    }
    if !drawn.is_empty() {
        for (b, file) in &drawn {
            let _ = writeln!(w, "![Term structure, {b}](charts/{file})\n");
        }
        let _ = writeln!(w, "*Figures {first} to {}. The same per bucket: the Kaplan-Meier cumulative default rate (line) with its Greenwood interval at each year (bars, none where no default was observed), and the members' mean implied cumulative PD (circles).*\n", *figure);
    }
    Ok(())
}

/// One-year grade migration of the pooled cohorts: a matrix of shares with the row counts, and
/// a heat map of the same shares.
pub fn migration_section(w: &mut String, tables_dir: &Path, charts_dir: &Path, figure: &mut usize) -> Result<()> {
    let path = tables_dir.join("backtest_migration.parquet");
    if !path.exists() {
        return Ok(());
    }
    let rows = tables::read_from::<crate::backtest::MigrationRow>(&path)?;
    let pooled: Vec<&crate::backtest::MigrationRow> = rows.iter().filter(|r| r.cohort == "all").collect();
    if pooled.is_empty() {
        return Ok(());
    }
    let years: BTreeSet<&str> = rows.iter().map(|r| r.cohort.as_str()).filter(|c| *c != "all").collect();
    let from: BTreeSet<u32> = pooled.iter().map(|r| r.from_grade).collect();
    let mut to_grades: BTreeSet<u32> = from.clone();
    to_grades.extend(pooled.iter().filter_map(|r| r.to.strip_prefix("grade ").and_then(|g| g.parse::<u32>().ok())));
    let mut cols: Vec<String> = to_grades.iter().map(|g| format!("grade {g}")).collect();
    cols.push("default".into());
    cols.push("left coverage".into());
    let _ = writeln!(w, "### Grade migration (one year, cohort method)\n\nAt each cohort date ({}), every entity of the grades table with a grade in force, not in default and in coverage, counted in its grade; a year later in `default` (a default inside coverage), `left coverage`, or the grade then in force. Cohorts whose year ends after the outcome end are left out. Pooled shares of each row (per-year counts in `tables/backtest_migration.parquet`):\n", years.iter().copied().collect::<Vec<_>>().join(", "));
    let head: Vec<String> = cols.iter().map(|c| c.replace("grade ", "to ")).collect();
    let _ = writeln!(w, "| from | n | {} |\n| --- | ---: |{}", head.join(" | "), " ---: |".repeat(cols.len()));
    let mut values = Vec::new();
    for g in &from {
        let cells: Vec<&&crate::backtest::MigrationRow> = pooled.iter().filter(|r| r.from_grade == *g).collect();
        let n = cells.first().map_or(0, |r| r.from_total);
        let shares: Vec<Option<f64>> =
            cols.iter().map(|c| Some(cells.iter().find(|r| &r.to == c).map_or(0.0, |r| r.share))).collect();
        let text: Vec<String> = shares.iter().map(|s| opt(*s, pct)).collect();
        let _ = writeln!(w, "| grade {g} | {n} | {} |", text.join(" | "));
        values.push(shares);
    }
    let _ = writeln!(w);
    let labels: Vec<String> = from.iter().map(|g| format!("grade {g}")).collect();
    let name = "migration.svg";
    if save_chart(
        charts_dir,
        name,
        charts::heat_map("One-year migration shares, cohorts pooled", &labels, &cols, &values),
    )? {
        *figure += 1;
        let _ = writeln!(w, "![Grade migration](charts/{name})\n");
        let _ = writeln!(w, "*Figure {figure}. Share of each grade's members (rows) in each grade, in default or out of coverage a year later (columns), cohorts pooled; darker is larger.*\n");
    }
    Ok(())
}
