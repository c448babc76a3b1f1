//! `hazardline selfcheck`: generates a planted-truth universe, runs the whole pipeline on it,
//! and compares what the pipeline recovered with what was planted: the data faults the
//! quality stage caught, the good rows it rejected, and the pricing-over-historical ratio per
//! grade against its planted value.

use crate::config::load_pipeline;
use crate::error::Result;
use crate::run::{run, RunOptions};
use crate::sim::{generate, ScenarioSpec};
use crate::stages::universe::{fault_rows, write_scenario};
use crate::tables::readback::{dates, floats, ints, read_frame, strs};
use chrono::NaiveDate;
use std::collections::{BTreeMap, BTreeSet};
use std::fmt::Write as _;
use std::path::Path;

/// Universe sizes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Size {
    /// 120 entities x 3 years, intensities x4: runs inside the test suite.
    Small,
    /// 600 entities x 6 years at the demo's intensities: by hand.
    Large,
}

impl Size {
    pub fn spec(self, seed: u64) -> ScenarioSpec {
        match self {
            Size::Small => ScenarioSpec {
                entities: 120,
                years: 3,
                intensity_scale: 4.0,
                bond_share: 0.0,
                ..ScenarioSpec::demo(seed)
            },
            Size::Large => ScenarioSpec { entities: 600, years: 6, bond_share: 0.05, ..ScenarioSpec::demo(seed) },
        }
    }
}

/// Pass criteria (stated in the printed table).
pub const MIN_FAULT_CATCH: f64 = 1.0;
pub const MAX_GOOD_REJECTED: f64 = 0.01;
/// A grade's ratio interval is judged only with at least this many defaults in its pooled
/// 1Y bucket: with fewer the interval is too wide to say anything either way.
pub const MIN_DEFAULTS: i64 = 5;

/// One grade's planted and recovered ratio.
#[derive(Debug, Clone, PartialEq)]
pub struct GradeRecovery {
    pub grade: u32,
    pub multiplier: f64,
    pub planted_ratio: f64,
    pub defaults: i64,
    pub ratio: Option<f64>,
    pub lo: Option<f64>,
    pub hi: Option<f64>,
    /// None when the grade has too few defaults to be judged.
    pub covered: Option<bool>,
}

/// Fitted against planted CIR parameters of one entity: (median fitted, median planted).
#[derive(Debug, Clone, PartialEq)]
pub struct CirRecovery {
    pub entity: String,
    pub fits: usize,
    pub kappa: (f64, f64),
    pub theta: (f64, f64),
    pub sigma: (f64, f64),
    pub lambda0: (f64, f64),
}

/// Median of the finite values (NaN when there are none).
fn median(mut v: Vec<f64>) -> f64 {
    v.retain(|x| x.is_finite());
    crate::stability::summary::quantile_sorted(&crate::stability::summary::sorted(&v), 0.5).unwrap_or(f64::NAN)
}

/// The CIR fits of the run against the planted pricing-measure parameters on the same dates.
fn cir_recovery(s: &crate::sim::Scenario, tables: &Path) -> Result<Vec<CirRecovery>> {
    use crate::sim::credit::pricing_params;
    let p = tables.join("intensity_params.parquet");
    let df = read_frame(&p)?;
    let (d, e, k, th, sg, l0, st) = (
        dates(&df, &p, "date")?,
        strs(&df, &p, "entity")?,
        floats(&df, &p, "kappa")?,
        floats(&df, &p, "theta")?,
        floats(&df, &p, "sigma")?,
        floats(&df, &p, "lambda0")?,
        strs(&df, &p, "status")?,
    );
    let index: BTreeMap<&str, usize> = s.entities.iter().enumerate().map(|(i, x)| (x.entity.as_str(), i)).collect();
    let month_end: BTreeMap<(usize, NaiveDate), f64> =
        s.intensities.iter().map(|r| ((r.entity, r.date), r.lambda_q)).collect();
    let mut by: BTreeMap<String, (Vec<f64>, Vec<f64>, Vec<f64>, Vec<f64>, Vec<f64>, Vec<f64>, Vec<f64>, Vec<f64>)> =
        BTreeMap::new();
    for i in 0..df.height() {
        let (Some(name), Some(date)) = (e[i].as_deref(), d[i]) else { continue };
        if st[i].as_deref() != Some("ok") {
            continue;
        }
        let Some(&ei) = index.get(name) else { continue };
        let grade = s.grades.iter().filter(|g| g.0 == ei && g.1 <= date).map(|g| g.2).next_back().unwrap_or(1);
        let prof = s.profiles[(grade - 1) as usize];
        let q = pricing_params(0.0, prof.theta_p, prof.multiplier);
        let slot = by.entry(name.to_string()).or_default();
        slot.0.push(k[i].unwrap_or(f64::NAN));
        slot.1.push(q.kappa);
        slot.2.push(th[i].unwrap_or(f64::NAN));
        slot.3.push(q.theta);
        slot.4.push(sg[i].unwrap_or(f64::NAN));
        slot.5.push(q.sigma);
        if let Some(&lq) = month_end.get(&(ei, date)) {
            slot.6.push(l0[i].unwrap_or(f64::NAN));
            slot.7.push(lq);
        }
    }
    Ok(by
        .into_iter()
        .map(|(entity, v)| CirRecovery {
            entity,
            fits: v.0.len(),
            kappa: (median(v.0), median(v.1)),
            theta: (median(v.2), median(v.3)),
            sigma: (median(v.4), median(v.5)),
            lambda0: (median(v.6), median(v.7)),
        })
        .collect())
}

/// One kind of planted fault.
#[derive(Debug, Clone, PartialEq)]
pub struct FaultRecovery {
    pub kind: &'static str,
    pub expected: &'static str,
    pub planted: usize,
    pub caught: usize,
}

/// The whole comparison.
#[derive(Debug, Clone, PartialEq)]
pub struct SelfCheck {
    pub faults: Vec<FaultRecovery>,
    pub good_rows: u64,
    pub good_rejected: u64,
    pub grades: Vec<GradeRecovery>,
    pub cir: Vec<CirRecovery>,
    /// Discrimination: the run's pooled 1Y AUC of the implied PD with its interval, and the
    /// AUC of the planted pricing PDs on the same members and outcomes.
    pub auc: Option<AucRecovery>,
    /// Members that left coverage inside their horizon (censored), as planted.
    pub censored_members: usize,
    pub passed: bool,
    pub table: String,
}

/// The run's AUC against the planted one.
#[derive(Debug, Clone, PartialEq)]
pub struct AucRecovery {
    pub members: usize,
    pub defaults: usize,
    pub auc: f64,
    pub lo: f64,
    pub hi: f64,
    pub planted: f64,
    pub covered: bool,
}

/// The planted AUC: the members of the run's pooled 1Y test (base recovery; defaulted or
/// survived) ranked by their planted pricing PD, against the run's own AUC row.
fn auc_recovery(s: &crate::sim::Scenario, tables: &Path, recovery: f64) -> Result<(Option<AucRecovery>, usize)> {
    use crate::backtest::{Outcome, Score};
    use crate::tables::parts::MemberRecord;
    use chrono::Datelike;
    let members = crate::tables::read_from::<MemberRecord>(&tables.join("backtest_members.parquet"))?;
    let base: Vec<&MemberRecord> =
        members.iter().filter(|m| (m.recovery - recovery).abs() < 1e-9 && m.member.horizon_years == 1).collect();
    let censored = base.iter().filter(|m| m.member.outcome == Outcome::Censored).count();
    let planted: std::collections::HashMap<(&str, i32), f64> =
        s.planted_pd_1y.iter().map(|&(e, d, pd)| ((s.entities[e].entity.as_str(), d.year()), pd)).collect();
    let (mut scores, mut outcome) = (Vec::new(), Vec::new());
    for m in &base {
        let d = match m.member.outcome {
            Outcome::Defaulted => true,
            Outcome::Survived => false,
            _ => continue,
        };
        if let Some(pd) = planted.get(&(m.member.entity.as_str(), m.member.cohort.year())) {
            scores.push(*pd);
            outcome.push(d);
        }
    }
    let rows = crate::tables::read_from::<crate::tables::DiscriminationRecord>(
        &tables.join("backtest_discrimination.parquet"),
    )?;
    let row = rows.iter().find(|r| {
        (r.recovery - recovery).abs() < 1e-9
            && r.row.cohort == "all"
            && r.row.horizon_years == 1
            && r.row.score == Score::ImpliedPd
    });
    let Some(row) = row else { return Ok((None, censored)) };
    let (Some(auc), Some(lo), Some(hi)) = (row.row.auc, row.row.auc_lo, row.row.auc_hi) else {
        return Ok((None, censored));
    };
    let Ok(p) = crate::stats::auc_delong(&scores, &outcome) else { return Ok((None, censored)) };
    Ok((
        Some(AucRecovery {
            members: scores.len(),
            defaults: outcome.iter().filter(|d| **d).count(),
            auc,
            lo,
            hi,
            planted: p.auc,
            covered: lo <= p.auc && p.auc <= hi,
        }),
        censored,
    ))
}

/// One planted fault and what caught it.
#[derive(Debug, Clone, PartialEq)]
pub struct FaultCheck {
    /// The fault's number in `truth/faults.csv`.
    pub id: usize,
    pub kind: &'static str,
    pub entity: String,
    /// The quote rows it planted, (file, 1-based row).
    pub rows: Vec<(String, u64)>,
    pub expected: &'static str,
    /// What the run produced for it: `reject:<reason>` of its rows (the first row's, when they
    /// differ) or `flag:<rule>`; None when nothing caught it.
    pub caught_by: Option<String>,
}

/// The planted faults against a run's rejects and flags.
#[derive(Debug, Clone, PartialEq)]
pub struct FaultComparison {
    pub by_kind: Vec<FaultRecovery>,
    pub faults: Vec<FaultCheck>,
    /// The faults nothing caught (a subset of `faults`).
    pub missed: Vec<FaultCheck>,
    /// Quote rows that carry no fault, and how many of them were rejected.
    pub good_rows: u64,
    pub good_rejected: u64,
}

/// Compares every planted fault of `s` with the rejects and flags in the run's `tables`
/// folder. A reject fault is caught when every row it planted is rejected with the expected
/// reason; a flag fault when a flag of the expected rule names its entity on a date inside
/// the fault. `source_prefix` is what the run's source paths put before `cds_quotes/...` (the
/// pipeline file's folder relative to the data: empty when the pipeline file sits beside it).
pub fn compare_faults(s: &crate::sim::Scenario, tables: &Path, source_prefix: &str) -> Result<FaultComparison> {
    let rp = tables.join("rejects.parquet");
    let rj = read_frame(&rp)?;
    let (rt, rs, rr, rreason) =
        (strs(&rj, &rp, "table")?, strs(&rj, &rp, "source")?, ints(&rj, &rp, "row")?, strs(&rj, &rp, "reason")?);
    let mut rejected: BTreeMap<(String, u64), String> = BTreeMap::new();
    for i in 0..rj.height() {
        if rt[i].as_deref() == Some("cds_quotes") {
            let source = rs[i].clone().unwrap_or_default();
            let source = source.strip_prefix(source_prefix).unwrap_or(&source).to_string();
            rejected.insert((source, rr[i].unwrap_or(0) as u64), rreason[i].clone().unwrap_or_default());
        }
    }
    let fp = crate::tables::readback::table_path(tables, "flags");
    let fl = read_frame(&fp)?;
    let (frule, fent, fdate) = (strs(&fl, &fp, "rule")?, strs(&fl, &fp, "entity")?, dates(&fl, &fp, "date")?);
    let mut flagged: BTreeSet<(String, String, NaiveDate)> = BTreeSet::new();
    for i in 0..fl.height() {
        if let (Some(r), Some(e), Some(d)) = (&frule[i], &fent[i], fdate[i]) {
            flagged.insert((r.clone(), e.clone(), d));
        }
    }

    let rows_of = fault_rows(s);
    let mut by_kind: BTreeMap<&'static str, FaultRecovery> = BTreeMap::new();
    let mut fault_row_set: BTreeSet<(String, u64)> = BTreeSet::new();
    let mut faults = Vec::new();
    for (i, f) in s.faults.iter().enumerate() {
        let rows = rows_of.get(&i).cloned().unwrap_or_default();
        let entity = &s.entities[f.entity].entity;
        let caught_by = if let Some(reason) = f.expected.strip_prefix("reject:") {
            let all = !rows.is_empty() && rows.iter().all(|k| rejected.get(k).map(String::as_str) == Some(reason));
            if all {
                Some(f.expected.to_string())
            } else {
                rows.iter().find_map(|k| rejected.get(k)).map(|r| format!("reject:{r} (not every row)"))
            }
        } else {
            let rule = f.expected.trim_start_matches("flag:");
            flagged
                .iter()
                .any(|(r, e, d)| r == rule && e == entity && *d >= f.date && *d <= f.last_date)
                .then(|| f.expected.to_string())
        };
        let caught = caught_by.as_deref() == Some(f.expected);
        fault_row_set.extend(rows.iter().cloned());
        let slot = by_kind.entry(f.kind).or_insert(FaultRecovery {
            kind: f.kind,
            expected: f.expected,
            planted: 0,
            caught: 0,
        });
        slot.planted += 1;
        slot.caught += caught as usize;
        faults.push(FaultCheck {
            id: i,
            kind: f.kind,
            entity: entity.clone(),
            rows,
            expected: f.expected,
            caught_by: caught_by.filter(|_| caught),
        });
    }
    let total_rows = s.quotes.len() as u64;
    let good_rows = total_rows - fault_row_set.len() as u64;
    let good_rejected = rejected.keys().filter(|k| !fault_row_set.contains(*k)).count() as u64;
    let missed = faults.iter().filter(|f| f.caught_by.is_none()).cloned().collect();
    Ok(FaultComparison { by_kind: by_kind.into_values().collect(), faults, missed, good_rows, good_rejected })
}

/// Generates the universe for `spec` under `dir`, runs the pipeline and compares.
pub fn selfcheck(dir: &Path, spec: &ScenarioSpec) -> Result<SelfCheck> {
    let s = generate(spec);
    write_scenario(dir, &s)?;
    let cfg = load_pipeline(&dir.join("pipeline.toml"))?;
    let summary = run(&cfg, &RunOptions { out_root: Some(dir.join("reports")), label: Some("selfcheck".into()) })?;
    let tables = summary.run_dir.join("tables");

    let comparison = compare_faults(&s, &tables, "")?;
    let FaultComparison { by_kind: ref faults, ref missed, good_rows, good_rejected, .. } = comparison;

    // Premium per grade.
    let pp = tables.join("risk_premia.parquet");
    let pr = read_frame(&pp)?;
    let (pc, pb, ph, prec, pd, pra, plo, phi) = (
        strs(&pr, &pp, "cohort")?,
        strs(&pr, &pp, "bucket")?,
        ints(&pr, &pp, "horizon")?,
        floats(&pr, &pp, "recovery")?,
        ints(&pr, &pp, "defaults")?,
        floats(&pr, &pp, "ratio")?,
        floats(&pr, &pp, "ratio_lo")?,
        floats(&pr, &pp, "ratio_hi")?,
    );
    let mut grades = Vec::new();
    for t in s.premium.iter().filter(|t| t.horizon_years == 1) {
        let label = format!("grade {}", t.grade);
        let i = (0..pr.height()).find(|&i| {
            pc[i].as_deref() == Some("all")
                && pb[i].as_deref() == Some(label.as_str())
                && ph[i] == Some(1)
                && prec[i].is_some_and(|r| (r - cfg.recovery).abs() < 1e-9)
        });
        let (defaults, ratio, lo, hi) = match i {
            Some(i) => (pd[i].unwrap_or(0), pra[i], plo[i], phi[i]),
            None => (0, None, None, None),
        };
        let covered =
            (defaults >= MIN_DEFAULTS).then(|| lo.is_some_and(|l| l <= t.ratio()) && hi.is_none_or(|h| t.ratio() <= h));
        grades.push(GradeRecovery {
            grade: t.grade,
            multiplier: t.multiplier,
            planted_ratio: t.ratio(),
            defaults,
            ratio,
            lo,
            hi,
            covered,
        });
    }

    let cir = cir_recovery(&s, &tables)?;
    let (auc, censored_members) = auc_recovery(&s, &tables, cfg.recovery)?;
    let auc_ok = auc.as_ref().is_some_and(|a| a.covered);

    let planted: usize = faults.iter().map(|f| f.planted).sum();
    let caught: usize = faults.iter().map(|f| f.caught).sum();
    let catch = caught as f64 / planted.max(1) as f64;
    let good_share = good_rejected as f64 / good_rows.max(1) as f64;
    let judged: Vec<&GradeRecovery> = grades.iter().filter(|g| g.covered.is_some()).collect();
    let premium_ok = judged.iter().all(|g| g.covered == Some(true));
    let passed = missed.is_empty()
        && catch >= MIN_FAULT_CATCH
        && good_share <= MAX_GOOD_REJECTED
        && premium_ok
        && auc_ok
        && !judged.is_empty();

    let mut t = String::new();
    let _ = writeln!(
        t,
        "planted-truth self-check: {} entities x {} years, seed {}, {} CDS quote rows, {} defaults",
        spec.entities,
        spec.years,
        spec.seed,
        s.quotes.len(),
        s.defaults.len()
    );
    let _ = writeln!(t, "\ndata faults                 expected                      planted   caught");
    for f in faults {
        let _ = writeln!(t, "  {:<26}{:<30}{:>7}{:>9}", f.kind, f.expected, f.planted, f.caught);
    }
    let _ = writeln!(t, "  caught {caught} of {planted} ({:.1}%; criterion: every one)", 100.0 * catch);
    let _ = writeln!(t, "\nevery planted fault (id as in truth/faults.csv, file and rows, what caught it)");
    for f in &comparison.faults {
        let rows = match (f.rows.first(), f.rows.last()) {
            (Some(a), Some(b)) if f.rows.len() > 1 => format!("{} rows {}..{} ({})", a.0, a.1, b.1, f.rows.len()),
            (Some(a), _) => format!("{} row {}", a.0, a.1),
            _ => "no quote row (a flag on the series)".to_string(),
        };
        let by = f.caught_by.as_deref().unwrap_or("MISSED");
        let _ = writeln!(t, "  #{:<4} {:<22} {:<28} {:<58} {}", f.id, f.kind, f.entity, rows, by);
    }
    let _ = writeln!(
        t,
        "  good rows rejected: {good_rejected} of {good_rows} ({:.3}%; criterion <= {:.0}%)",
        100.0 * good_share,
        100.0 * MAX_GOOD_REJECTED
    );
    let _ = writeln!(t, "\npricing / historical, 1Y, all cohorts (planted ratio = sum of pricing over sum of historical cumulative hazards of the cohort members)");
    let _ = writeln!(t, "  grade  multiplier  planted ratio  defaults  estimated ratio  interval            covered");
    let f = |x: Option<f64>| x.map_or("-".to_string(), |v| format!("{v:.2}"));
    for g in &grades {
        let _ = writeln!(
            t,
            "  {:>5}  {:>10.2}  {:>13.2}  {:>8}  {:>15}  [{:>6}, {:>6}]     {}",
            g.grade,
            g.multiplier,
            g.planted_ratio,
            g.defaults,
            f(g.ratio),
            f(g.lo),
            f(g.hi),
            match g.covered {
                Some(true) => "yes",
                Some(false) => "NO",
                None => "(fewer than 5 defaults: not judged)",
            }
        );
    }
    let planted_exits = s.entities.iter().filter(|e| e.coverage_end.is_some()).count();
    let _ = writeln!(t, "\ndiscrimination, 1Y, all cohorts ({planted_exits} names planted to leave coverage: {censored_members} censored 1Y members; the last cohort's horizon ends after the outcome end)");
    match &auc {
        Some(a) => {
            let _ = writeln!(
                t,
                "  AUC of the implied PD {:.4} [{:.4}, {:.4}] over {} members ({} defaults); AUC of the planted pricing PDs on the same members {:.4}: {} (criterion: inside the interval)",
                a.auc,
                a.lo,
                a.hi,
                a.members,
                a.defaults,
                a.planted,
                if a.covered { "inside" } else { "OUTSIDE" }
            );
        }
        None => {
            let _ = writeln!(t, "  no pooled 1Y AUC (no defaults or no survivors): FAIL");
        }
    }
    if !cir.is_empty() {
        let _ = writeln!(t, "\nCIR fit (fixed_kappa_sigma mode) against the planted pricing-measure parameters, medians over the fitted dates");
        let _ = writeln!(t, "(reported, not judged: one curve identifies lambda0 and the curve's level, not kappa and sigma separately)");
        let _ = writeln!(t, "  entity                       fits   kappa fit/planted   theta fit/planted   sigma fit/planted   lambda0 fit/planted (month ends)");
        for c in &cir {
            let _ = writeln!(
                t,
                "  {:<28}{:>5}   {:>7.3} / {:<7.3}   {:>7.4} / {:<7.4}   {:>7.4} / {:<7.4}   {:>7.4} / {:<7.4}",
                c.entity,
                c.fits,
                c.kappa.0,
                c.kappa.1,
                c.theta.0,
                c.theta.1,
                c.sigma.0,
                c.sigma.1,
                c.lambda0.0,
                c.lambda0.1
            );
        }
    }
    let _ = writeln!(t, "\nresult: {}", if passed { "PASS" } else { "FAIL" });
    Ok(SelfCheck {
        faults: faults.clone(),
        good_rows,
        good_rejected,
        grades,
        cir,
        auc,
        censored_members,
        passed,
        table: t,
    })
}
