//! `hazardline flag-rates`: how often each stability rule raises a flag on a universe without
//! instabilities (its false-alarm rate), and how often it catches planted ones (its detection
//! rate), both measured with the whole pipeline on invented universes.
//!
//! Two universes from one seed: the clean one has no data faults and no grade migration, so
//! every entity's intensity follows one CIR process with constant parameters and every flag it
//! raises is, for the question "did this name's model change?", a false alarm (the market
//! still moves: a rule that flags ordinary moves shows it here). The planted one is the same
//! universe (same seed, same draws) with instabilities on distinct entities (see
//! [`crate::sim::Instability`]): a pricing premium that doubles and stays, or a quarter of
//! quotes ten times noisier than usual.
//!
//! Units. A rule's false-alarm rate is the share of entity-periods (one entity in one review
//! period, over the clean universe's stability rows) on which it flags; since an instability
//! is credited to a rule that flags its entity in the period it starts or the next one, the
//! rate over such two-period windows is printed beside it, the fair comparison for the
//! detection rate. Flags with no entity (universe rows, PSI) are counted apart.

use crate::config::load_pipeline;
use crate::error::Result;
use crate::report::flag_notes::{TARGET_AMBER, TARGET_RED};
use crate::run::{run, RunOptions};
use crate::sim::{generate, Instability, ScenarioSpec};
use crate::stages::universe::write_scenario_tiers;
use crate::tables::readback::{read_frame, strs};
use std::collections::{BTreeMap, BTreeSet};
use std::fmt::Write as _;
use std::path::Path;

/// One rule's measured rates.
#[derive(Debug, Clone, PartialEq)]
pub struct RuleRate {
    pub rule: String,
    /// Flags of the rule on the clean universe (entity flags only).
    pub clean_flags: usize,
    /// Entity-periods it flagged on the clean universe, and the share of all entity-periods.
    pub clean_entity_periods: usize,
    pub false_alarm: f64,
    /// Share of entity-periods with a red flag of the rule on the clean universe.
    pub false_alarm_red: f64,
    /// Share of (entity, period and next period) windows it flagged on the clean universe.
    pub false_alarm_window: f64,
    /// Flags with no entity on the clean universe.
    pub clean_universe_flags: usize,
    /// Per instability kind: (caught, planted).
    pub detected: BTreeMap<String, (usize, usize)>,
}

/// The measurement.
#[derive(Debug, Clone, PartialEq)]
pub struct FlagRates {
    pub entity_periods: usize,
    pub rules: Vec<RuleRate>,
    /// Each planted instability with the rules that caught it.
    pub planted: Vec<(Instability, String, Vec<String>)>,
    /// Whether every rule meets the targets on the clean universe.
    pub met: bool,
    pub table: String,
}

/// One stability flag of a run.
struct Flag {
    rule: String,
    entity: Option<String>,
    period: String,
    red: bool,
}

/// Every stability flag of a run.
fn flags_of(tables: &Path) -> Result<Vec<Flag>> {
    let path = tables.join("flags.parquet");
    let df = read_frame(&path)?;
    let (rule, entity, period, stage, severity) = (
        strs(&df, &path, "rule")?,
        strs(&df, &path, "entity")?,
        strs(&df, &path, "period")?,
        strs(&df, &path, "stage")?,
        strs(&df, &path, "severity")?,
    );
    Ok((0..df.height())
        .filter(|&i| stage[i].as_deref() == Some("stability"))
        .map(|i| Flag {
            rule: rule[i].clone().unwrap_or_default(),
            entity: entity[i].clone(),
            period: period[i].clone().unwrap_or_default(),
            red: severity[i].as_deref() == Some("red"),
        })
        .collect())
}

/// Every (entity, period) with an entity row in the stability table, and the periods in order.
fn entity_periods(tables: &Path) -> Result<(BTreeSet<(String, String)>, Vec<String>)> {
    let path = tables.join("stability.parquet");
    let df = read_frame(&path)?;
    let (period, scope, key) = (strs(&df, &path, "period")?, strs(&df, &path, "scope")?, strs(&df, &path, "key")?);
    let mut out = BTreeSet::new();
    let mut periods = BTreeSet::new();
    for i in 0..df.height() {
        if let (Some(p), Some("entity"), Some(k)) = (&period[i], scope[i].as_deref(), &key[i]) {
            out.insert((k.clone(), p.clone()));
            periods.insert(p.clone());
        }
    }
    Ok((out, periods.into_iter().collect()))
}

fn run_universe(
    dir: &Path,
    spec: &ScenarioSpec,
) -> Result<(crate::sim::Scenario, std::path::PathBuf, crate::stability::StabilitySettings)> {
    let s = generate(spec);
    write_scenario_tiers(dir, &s, false)?;
    let cfg = load_pipeline(&dir.join("pipeline.toml"))?;
    let summary = run(&cfg, &RunOptions { out_root: Some(dir.join("reports")), label: Some("flag-rates".into()) })?;
    Ok((s, summary.run_dir.join("tables"), cfg.stability.clone()))
}

/// Runs both universes under `dir` and measures every stability rule. `spec.instabilities`
/// sets how many are planted; faults, migration and bonds are turned off in both.
pub fn flag_rates(dir: &Path, spec: &ScenarioSpec) -> Result<FlagRates> {
    let base = ScenarioSpec { faults: false, migration: false, bond_share: 0.0, ..spec.clone() };
    let (_, clean_tables, settings) =
        run_universe(&dir.join("clean"), &ScenarioSpec { instabilities: 0, ..base.clone() })?;
    let (planted_s, planted_tables, _) = run_universe(&dir.join("planted"), &base)?;

    let (eps, periods) = entity_periods(&clean_tables)?;
    let next: BTreeMap<&str, &str> = periods.windows(2).map(|w| (w[0].as_str(), w[1].as_str())).collect();
    let clean = flags_of(&clean_tables)?;
    let planted_flags = flags_of(&planted_tables)?;
    let mut rules: BTreeSet<String> = clean.iter().chain(&planted_flags).map(|f| f.rule.clone()).collect();
    // Every stability rule gets a row, flagged or not (the data-quality rules stay out: the
    // universes have no data faults).
    use crate::text::{FlagRule, TextForm};
    for r in FlagRule::ALL
        .iter()
        .filter(|r| !matches!(r, FlagRule::StaleRun | FlagRule::Spike | FlagRule::FewTenors | FlagRule::InvertedCurve))
    {
        rules.insert(r.as_str().to_string());
    }

    let windows: Vec<(&(String, String), &str)> =
        eps.iter().filter_map(|ep| next.get(ep.1.as_str()).map(|n| (ep, *n))).collect();
    let name = |e: usize| planted_s.entities[e].entity.clone();
    let mut planted: Vec<(Instability, String, Vec<String>)> =
        planted_s.instabilities.iter().map(|x| (x.clone(), name(x.entity), Vec::new())).collect();
    let mut out = Vec::new();
    for rule in &rules {
        let flagged: BTreeSet<(String, String)> = clean
            .iter()
            .filter(|f| &f.rule == rule)
            .filter_map(|f| Some((f.entity.clone()?, f.period.clone())))
            .collect();
        let flagged_red: BTreeSet<(String, String)> = clean
            .iter()
            .filter(|f| &f.rule == rule && f.red)
            .filter_map(|f| Some((f.entity.clone()?, f.period.clone())))
            .collect();
        let clean_flags = clean.iter().filter(|f| &f.rule == rule && f.entity.is_some()).count();
        let clean_universe_flags = clean.iter().filter(|f| &f.rule == rule && f.entity.is_none()).count();
        let in_window = windows
            .iter()
            .filter(|(ep, n)| flagged.contains(*ep) || flagged.contains(&(ep.0.clone(), n.to_string())))
            .count();
        let mut detected: BTreeMap<String, (usize, usize)> = BTreeMap::new();
        for (x, entity, caught_by) in planted.iter_mut() {
            let p0 = settings.period.of(x.date).label();
            let p1 = next.get(p0.as_str()).map(|s| s.to_string());
            let hit = planted_flags.iter().any(|f| {
                &f.rule == rule
                    && f.entity.as_deref() == Some(entity.as_str())
                    && (f.period == p0 || Some(&f.period) == p1.as_ref())
            });
            let d = detected.entry(x.kind.to_string()).or_default();
            d.1 += 1;
            if hit {
                d.0 += 1;
                caught_by.push(rule.clone());
            }
        }
        out.push(RuleRate {
            rule: rule.clone(),
            clean_flags,
            clean_entity_periods: flagged.len(),
            false_alarm: flagged.len() as f64 / eps.len().max(1) as f64,
            false_alarm_red: flagged_red.len() as f64 / eps.len().max(1) as f64,
            false_alarm_window: in_window as f64 / windows.len().max(1) as f64,
            clean_universe_flags,
            detected,
        });
    }
    let met = out.iter().all(|r| r.false_alarm <= TARGET_AMBER && r.false_alarm_red <= TARGET_RED);
    let table = render(spec, eps.len(), windows.len(), &out, &planted, met);
    Ok(FlagRates { entity_periods: eps.len(), rules: out, planted, met, table })
}

fn render(
    spec: &ScenarioSpec,
    eps: usize,
    windows: usize,
    rules: &[RuleRate],
    planted: &[(Instability, String, Vec<String>)],
    met: bool,
) -> String {
    let mut t = String::new();
    let kinds: BTreeSet<&str> = planted.iter().map(|p| p.0.kind).collect();
    let _ = writeln!(
        t,
        "flag rates: {} entities x {} years, seed {}; clean universe: {eps} entity-periods ({windows} two-period windows); planted: {} instabilities",
        spec.entities,
        spec.years,
        spec.seed,
        planted.len()
    );
    let _ = write!(
        t,
        "\n  {:<26}{:>12}{:>13}{:>10}{:>17}{:>10}",
        "rule", "clean flags", "false alarm", "red", "2-period window", "universe"
    );
    for k in &kinds {
        let _ = write!(t, "{:>24}", format!("caught {k}"));
    }
    let _ = writeln!(t);
    for r in rules {
        let _ = write!(
            t,
            "  {:<26}{:>12}{:>12.2}%{:>9.2}%{:>16.2}%{:>10}",
            r.rule,
            r.clean_flags,
            100.0 * r.false_alarm,
            100.0 * r.false_alarm_red,
            100.0 * r.false_alarm_window,
            r.clean_universe_flags
        );
        for k in &kinds {
            let (c, n) = r.detected.get(*k).copied().unwrap_or((0, 0));
            let _ = write!(t, "{:>24}", format!("{c} of {n}"));
        }
        let _ = writeln!(t);
    }
    for k in &kinds {
        let of_kind: Vec<_> = planted.iter().filter(|p| p.0.kind == *k).collect();
        let any = of_kind.iter().filter(|p| !p.2.is_empty()).count();
        let _ = writeln!(t, "  any rule, {k}: caught {any} of {}", of_kind.len());
    }
    let _ = writeln!(
        t,
        "  target on the clean universe: every rule at most {:.0}% of entity-periods, {:.0}% at red: {}",
        100.0 * TARGET_AMBER,
        100.0 * TARGET_RED,
        if met { "met" } else { "NOT MET" }
    );
    let _ =
        writeln!(t, "\nevery planted instability (as in planted/truth/instabilities.csv) and the rules that caught it");
    for (i, (x, entity, by)) in planted.iter().enumerate() {
        let by = if by.is_empty() { "MISSED".to_string() } else { by.join(", ") };
        let _ = writeln!(t, "  #{i:<3} {:<14} {:<28} {} .. {}  {by}", x.kind, entity, x.date, x.last_date);
    }
    t
}
