//! The findings at the top of the report: what a reviewer reads first. Red flags one group per
//! rule and series, then the amber ones (and data-quality warnings) grouped by rule, each with
//! its count, the entities it touches, the names it touches most and its worst case, then the
//! rules that raised nothing. Every number here is a count over `tables/flags.parquet`, whose
//! rows carry the detail.

use super::markdown::cell_text;
use crate::tables::flags::FlagRecord;
use crate::text::{FlagRule, Severity, TextForm};
use std::collections::{BTreeMap, BTreeSet};
use std::fmt::Write as _;

/// How far past its threshold a flag is, for "worst case": the ratio of value and threshold,
/// by size, either way (a ceiling rule flags values above its threshold, a floor rule such as
/// `few_tenors` values below it).
fn excess(f: &FlagRecord) -> f64 {
    let (v, t) = (f.flag.value.abs(), f.flag.threshold.abs());
    if t > 0.0 && v > 0.0 && v.is_finite() {
        (v / t).max(t / v)
    } else {
        v
    }
}

/// One group of flags: (stage, rule, series for red groups).
#[derive(Default)]
struct Group<'a> {
    flags: Vec<&'a FlagRecord>,
}

impl<'a> Group<'a> {
    fn entities(&self) -> BTreeMap<&'a str, usize> {
        let mut by: BTreeMap<&str, usize> = BTreeMap::new();
        for f in &self.flags {
            if let Some(e) = f.flag.entity.as_deref() {
                *by.entry(e).or_default() += 1;
            }
        }
        by
    }

    fn worst(&self) -> Option<&'a FlagRecord> {
        self.flags.iter().copied().max_by(|a, b| excess(a).total_cmp(&excess(b)))
    }
}

fn where_of(f: &FlagRecord) -> String {
    let g = &f.flag;
    let mut place = match g.entity.as_deref() {
        Some(e) => format!("{} {}", cell_text(e), cell_text(&g.series)),
        None => format!("universe {}", cell_text(&g.series)),
    };
    match g.date {
        Some(d) => place += &format!(" on {d}"),
        None => place += &format!(" in {}", g.period),
    }
    place
}

fn most_flagged(entities: &BTreeMap<&str, usize>) -> String {
    let mut v: Vec<(&str, usize)> = entities.iter().map(|(e, n)| (*e, *n)).collect();
    v.sort_by(|a, b| b.1.cmp(&a.1).then(a.0.cmp(b.0)));
    v.iter().take(3).map(|(e, n)| format!("{} ({n})", cell_text(e))).collect::<Vec<_>>().join(", ")
}

/// Writes the findings subsection.
pub fn findings_section(w: &mut String, flags: &[FlagRecord]) {
    let _ = writeln!(w, "### Findings\n");
    let mut red: BTreeMap<(&str, &str, &str), Group> = BTreeMap::new();
    let mut amber: BTreeMap<(&str, &str), Group> = BTreeMap::new();
    for f in flags {
        match f.flag.severity {
            Severity::Red => {
                red.entry((f.stage, f.flag.rule.as_str(), f.flag.series.as_str())).or_default().flags.push(f)
            }
            Severity::Amber | Severity::Warning => {
                amber.entry((f.stage, f.flag.rule.as_str())).or_default().flags.push(f)
            }
            Severity::Info => {}
        }
    }
    if red.is_empty() {
        let _ = writeln!(w, "No red flags.\n");
    } else {
        let _ = writeln!(w, "Red, by rule and series (every row in `tables/flags.parquet`, severity `red`):\n\n| stage | rule | series | flags | entities | most flagged | worst case (value / threshold) |\n| --- | --- | --- | ---: | ---: | --- | --- |");
        for ((stage, rule, series), g) in &red {
            let worst = g.worst().map(|f| format!("{} ({:.3} / {})", where_of(f), f.flag.value, f.flag.threshold));
            let ents = g.entities();
            let _ = writeln!(
                w,
                "| {stage} | `{rule}` | {} | {} | {} | {} | {} |",
                cell_text(series),
                g.flags.len(),
                ents.len(),
                most_flagged(&ents),
                worst.unwrap_or_default()
            );
        }
        let _ = writeln!(w);
    }
    if !amber.is_empty() {
        let _ = writeln!(w, "Amber and warnings, by rule (the same table, the other severities):\n\n| stage | rule | flags | entities | most flagged | worst case (value / threshold) |\n| --- | --- | ---: | ---: | --- | --- |");
        for ((stage, rule), g) in &amber {
            let worst = g.worst().map(|f| format!("{} ({:.3} / {})", where_of(f), f.flag.value, f.flag.threshold));
            let ents = g.entities();
            let _ = writeln!(
                w,
                "| {stage} | `{rule}` | {} | {} | {} | {} |",
                g.flags.len(),
                ents.len(),
                most_flagged(&ents),
                worst.unwrap_or_default()
            );
        }
        let _ = writeln!(w);
    }
    misfits_with_data_flags(w, flags);
    let raised: BTreeSet<&str> = flags.iter().map(|f| f.flag.rule.as_str()).collect();
    let quiet: Vec<String> =
        FlagRule::ALL.iter().map(|r| r.as_str()).filter(|r| !raised.contains(r)).map(|r| format!("`{r}`")).collect();
    let _ = writeln!(
        w,
        "Rules that raised no flag in this run: {}. A rule raises nothing where its inputs are missing (no CIR fit, too few names for a PSI), so read this with the settings in section 7.\n",
        if quiet.is_empty() { "none".to_string() } else { quiet.join(", ") }
    );
}

/// Calendar days either side of a misfit within which a data-quality flag on the same entity
/// is shown beside it.
pub const NEXT_TO_DAYS: i64 = 3;

/// The entity a flag is about: a series entity of a multi-currency name is `Name/CCY`.
fn base_entity(e: &str) -> &str {
    e.split_once('/').map_or(e, |(a, _)| a)
}

/// Residual misfits (`residual_over_tolerance`) with the data-quality flags (kept rows: spikes,
/// inverted curves, stale runs, ...) on the same entity within [`NEXT_TO_DAYS`] calendar days:
/// a misfit next to a flagged quote is most likely that quote, not the model.
fn misfits_with_data_flags(w: &mut String, flags: &[FlagRecord]) {
    let misfits: Vec<&FlagRecord> =
        flags.iter().filter(|f| f.flag.rule == FlagRule::ResidualOverTolerance && f.flag.date.is_some()).collect();
    if misfits.is_empty() {
        return;
    }
    let mut dq: BTreeMap<&str, Vec<&FlagRecord>> = BTreeMap::new();
    for f in flags.iter().filter(|f| f.stage == "data_quality" && f.flag.date.is_some()) {
        if let Some(e) = f.flag.entity.as_deref() {
            dq.entry(base_entity(e)).or_default().push(f);
        }
    }
    let mut by_method: BTreeMap<&str, (usize, usize)> = BTreeMap::new();
    let mut pairs: Vec<(&FlagRecord, Vec<&FlagRecord>)> = Vec::new();
    for m in &misfits {
        let method = m.flag.series.strip_prefix("residual_bp/").unwrap_or(&m.flag.series);
        let slot = by_method.entry(method).or_default();
        slot.0 += 1;
        let (Some(e), Some(d)) = (m.flag.entity.as_deref(), m.flag.date) else { continue };
        let near: Vec<&FlagRecord> = dq
            .get(base_entity(e))
            .map(|v| {
                v.iter()
                    .copied()
                    .filter(|f| f.flag.date.is_some_and(|x| (x - d).num_days().abs() <= NEXT_TO_DAYS))
                    .collect()
            })
            .unwrap_or_default();
        if !near.is_empty() {
            slot.1 += 1;
            pairs.push((m, near));
        }
    }
    let counts: Vec<String> = by_method.iter().map(|(m, (n, k))| format!("{k} of {n} `{m}` misfits")).collect();
    let _ = writeln!(w, "Misfits next to flagged data: {} have a data-quality flag on the same entity within {NEXT_TO_DAYS} days (a kept quote the quality rules flagged, most likely the cause).\n", counts.join(", "));
    if pairs.is_empty() {
        return;
    }
    const SHOWN: usize = 15;
    pairs.sort_by(|a, b| excess(b.0).total_cmp(&excess(a.0)));
    let _ =
        writeln!(w, "| misfit | residual bp | data-quality flags within {NEXT_TO_DAYS} days |\n| --- | ---: | --- |");
    for (m, near) in pairs.iter().take(SHOWN) {
        let list: Vec<String> = near
            .iter()
            .map(|f| {
                format!(
                    "`{}` {} on {}",
                    f.flag.rule.as_str(),
                    cell_text(&f.flag.series),
                    f.flag.date.map(|d| d.to_string()).unwrap_or_default()
                )
            })
            .collect();
        let _ = writeln!(w, "| {} | {:.1} | {} |", where_of(m), m.flag.value, list.join("; "));
    }
    if pairs.len() > SHOWN {
        let _ = writeln!(
            w,
            "\n{} more such misfits are in `tables/flags.parquet` (rule `residual_over_tolerance`).",
            pairs.len() - SHOWN
        );
    }
    let _ = writeln!(w);
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stability::FlagRow;

    fn flag(rule: FlagRule, severity: Severity, entity: Option<&str>, value: f64) -> FlagRecord {
        FlagRecord::review(
            "stability",
            &FlagRow {
                rule,
                severity,
                entity: entity.map(str::to_string),
                series: "cir_theta".into(),
                period: "2019Q1".into(),
                date: None,
                value,
                threshold: 1.0,
                explanation: "x.".into(),
            },
        )
    }

    #[test]
    fn findings_group_count_and_name_the_worst_case() {
        let flags = vec![
            flag(FlagRule::CusumBreak, Severity::Red, Some("Alder"), 1.5),
            flag(FlagRule::CusumBreak, Severity::Red, Some("Alder"), 3.0),
            flag(FlagRule::CusumBreak, Severity::Red, Some("Birch"), 2.0),
            flag(FlagRule::CvHigh, Severity::Amber, Some("Birch"), 4.0),
        ];
        let mut w = String::new();
        findings_section(&mut w, &flags);
        assert!(w.contains("| stability | `cusum_break` | cir_theta | 3 | 2 | Alder (2), Birch (1) | Alder cir_theta in 2019Q1 (3.000 / 1) |"), "{w}");
        assert!(w.contains("| stability | `cv_high` | 1 | 1 | Birch (1) |"), "{w}");
        assert!(w.contains("`psi_shift`") && !w.contains("no flag in this run: `cusum_break`"), "{w}");
        // A floor rule's worst case is its lowest value.
        let floor = |v: f64| {
            FlagRecord::review(
                "data_quality",
                &FlagRow { threshold: 3.0, ..flag(FlagRule::FewTenors, Severity::Warning, Some("Cedar"), v).flag },
            )
        };
        let mut f2 = String::new();
        findings_section(&mut f2, &[floor(2.0), floor(1.0)]);
        assert!(f2.contains("(1.000 / 3)"), "{f2}");
        let mut none = String::new();
        findings_section(&mut none, &[]);
        assert!(none.contains("No red flags."));
    }

    /// A misfit two days after a spike on the same name (quoted in two currencies, so its
    /// series entity is `Name/CCY`) is shown with it; one five days away, or on another name,
    /// is not.
    #[test]
    fn misfits_are_shown_with_the_data_flags_next_to_them() {
        let day = |d: u32| chrono::NaiveDate::from_ymd_opt(2016, 11, d);
        let misfit = |e: &str, d: u32| {
            FlagRecord::review(
                "stability",
                &FlagRow {
                    series: "residual_bp/bootstrap".into(),
                    date: day(d),
                    threshold: 1e-6,
                    ..flag(FlagRule::ResidualOverTolerance, Severity::Amber, Some(e), 86.9).flag
                },
            )
        };
        let spike = FlagRecord::review(
            "data_quality",
            &FlagRow {
                series: "EUR 5Y".into(),
                date: day(5),
                ..flag(FlagRule::Spike, Severity::Warning, Some("Alder"), 40.0).flag
            },
        );
        let flags = vec![misfit("Alder/EUR", 7), misfit("Alder/EUR", 10), misfit("Birch", 7), spike];
        let mut w = String::new();
        findings_section(&mut w, &flags);
        assert!(w.contains("1 of 3 `bootstrap` misfits"), "{w}");
        assert!(
            w.contains("| Alder/EUR residual_bp/bootstrap on 2016-11-07 | 86.9 | `spike` EUR 5Y on 2016-11-05 |"),
            "{w}"
        );
        assert!(!w.contains("on 2016-11-10 | 86.9"), "{w}");
    }
}
