//! `hazardline compare RUN_A RUN_B`: what changed between two reviews, as Markdown: row
//! accounting, calibration outcome, the shift of each entity's mean 5Y hazard, and the flags
//! that are new in B or cleared since A.

use crate::error::Result;
use crate::tables::flags::FlagRecord;
use crate::tables::manifest;
use crate::tables::readback;
use std::collections::{BTreeMap, BTreeSet};
use std::fmt::Write as _;
use std::path::Path;

fn mean_5y(run: &Path) -> Result<BTreeMap<String, (f64, usize)>> {
    // The table can be tens of millions of rows: read a slice at a time.
    let mut m: BTreeMap<String, (f64, usize)> = BTreeMap::new();
    readback::slices::<crate::tables::HazardCurveRow>(
        &readback::table_path(&run.join("tables"), "hazard_curves"),
        |rows| {
            for r in rows.iter().filter(|r| {
                r.source == crate::text::CurveSource::Cds && &*r.tenor == "5Y" && r.status == crate::text::RowStatus::Ok
            }) {
                if let Some(x) = r.hazard {
                    let e = m.entry(r.entity.to_string()).or_default();
                    e.0 += x;
                    e.1 += 1;
                }
            }
            Ok(())
        },
    )?;
    Ok(m.into_iter().map(|(k, (s, n))| (k, (s / n as f64, n))).collect())
}

/// The comparison as Markdown.
pub fn compare(a: &Path, b: &Path) -> Result<String> {
    let (ma, mb) = (manifest::read(&a.join("manifest.json"))?, manifest::read(&b.join("manifest.json"))?);
    let mut w = String::new();
    let _ = writeln!(w, "# Comparison of two reviews\n");
    let _ = writeln!(w, "> **Caution.** {}\n", crate::report::markdown::CAUTION);
    let _ = writeln!(w, "- A: {} / {} (period {:?})", ma.name, ma.label, ma.period);
    let _ = writeln!(w, "- B: {} / {} (period {:?})\n", mb.name, mb.label, mb.period);
    let _ = writeln!(w, "## Row accounting\n\n| stage | table | rows in A | rows in B | rejected A | rejected B |\n| --- | --- | ---: | ---: | ---: | ---: |");
    let keys: BTreeSet<(String, String)> =
        ma.counts.iter().chain(&mb.counts).map(|c| (c.stage.clone(), c.table.clone())).collect();
    for (s, t) in &keys {
        let f = |m: &manifest::Manifest| {
            m.counts.iter().find(|c| &c.stage == s && &c.table == t).map(|c| (c.rows_in, c.rejected))
        };
        let (x, y) = (f(&ma), f(&mb));
        let show = |v: Option<(u64, u64)>, i: usize| {
            v.map_or("-".to_string(), |p| if i == 0 { p.0.to_string() } else { p.1.to_string() })
        };
        let _ = writeln!(w, "| {s} | {t} | {} | {} | {} | {} |", show(x, 0), show(y, 0), show(x, 1), show(y, 1));
    }
    let (ha, hb) = (mean_5y(a)?, mean_5y(b)?);
    let _ = writeln!(w, "\n## Mean 5Y hazard by entity\n\n| entity | A (%) | B (%) | change (bp of hazard) |\n| --- | ---: | ---: | ---: |");
    let ents: BTreeSet<&String> = ha.keys().chain(hb.keys()).collect();
    let mut rows: Vec<(String, Option<f64>, Option<f64>)> =
        ents.iter().map(|e| ((*e).clone(), ha.get(*e).map(|v| v.0), hb.get(*e).map(|v| v.0))).collect();
    rows.sort_by(|x, y| {
        let d = |r: &(String, Option<f64>, Option<f64>)| match (r.1, r.2) {
            (Some(a), Some(b)) => (b - a).abs(),
            _ => f64::INFINITY,
        };
        d(y).total_cmp(&d(x)).then(x.0.cmp(&y.0))
    });
    for (e, x, y) in &rows {
        let f = |v: &Option<f64>| v.map_or("-".to_string(), |v| format!("{:.3}", v * 100.0));
        let ch = match (x, y) {
            (Some(a), Some(b)) => format!("{:+.1}", (b - a) * 1e4),
            _ => "-".into(),
        };
        let _ = writeln!(w, "| {} | {} | {} | {ch} |", super::markdown::cell_text(e), f(x), f(y));
    }
    discrimination(&mut w, a, b)?;
    let fa: Vec<FlagRecord> = crate::tables::read(&a.join("tables"))?;
    let fb: Vec<FlagRecord> = crate::tables::read(&b.join("tables"))?;
    let key =
        |f: &FlagRecord| (f.flag.rule, f.flag.entity.clone().unwrap_or_default(), f.flag.series.clone(), f.flag.date);
    let ka: BTreeSet<_> = fa.iter().map(key).collect();
    let kb: BTreeSet<_> = fb.iter().map(key).collect();
    let new: Vec<_> = fb.iter().filter(|f| !ka.contains(&key(f))).collect();
    let cleared: Vec<_> = fa.iter().filter(|f| !kb.contains(&key(f))).collect();
    let _ = writeln!(
        w,
        "\n## Flags\n\n{} flags in A, {} in B; {} new in B, {} cleared since A.\n",
        fa.len(),
        fb.len(),
        new.len(),
        cleared.len()
    );
    for (title, list) in [("New in B", &new), ("Cleared since A", &cleared)] {
        if !list.is_empty() {
            let _ = writeln!(
                w,
                "{title}:\n\n| rule | entity | series | date | explanation |\n| --- | --- | --- | --- | --- |"
            );
            for f in list.iter().take(30) {
                let g = &f.flag;
                let _ = writeln!(
                    w,
                    "| `{}` | {} | {} | {} | {} |",
                    g.rule.as_str(),
                    super::markdown::cell_text(g.entity.as_deref().unwrap_or("")),
                    super::markdown::cell_text(&g.series),
                    g.date.map(|d| d.to_string()).unwrap_or_default(),
                    super::markdown::cell_text(&g.explanation.replace('|', "/"))
                );
            }
            let _ = writeln!(w);
        }
    }
    Ok(w)
}

/// The pooled AUCs of both reviews side by side, with the test of their difference (the two
/// samples taken as independent), when both ran the backtest.
fn discrimination(w: &mut String, a: &Path, b: &Path) -> Result<()> {
    use crate::tables::DiscriminationRecord;
    let file = |r: &Path| r.join("tables").join("backtest_discrimination.parquet");
    if !file(a).is_file() || !file(b).is_file() {
        return Ok(());
    }
    let (ra, rb) = (
        crate::tables::read_from::<DiscriminationRecord>(&file(a))?,
        crate::tables::read_from::<DiscriminationRecord>(&file(b))?,
    );
    let pooled = |v: &[DiscriminationRecord]| -> Vec<DiscriminationRecord> {
        // The base recovery is the one listed first.
        let base = v.first().map(|r| r.recovery);
        v.iter().filter(|r| r.row.cohort == "all" && Some(r.recovery) == base).cloned().collect()
    };
    let (pa, pb) = (pooled(&ra), pooled(&rb));
    if pa.is_empty() && pb.is_empty() {
        return Ok(());
    }
    let _ = writeln!(w, "\n## Discriminatory power (pooled cohorts)\n\nAUC of each score in A and in B, with the two-sided p-value of their difference, z = (AUC_B - AUC_A) / sqrt(se_A^2 + se_B^2), the reviews taken as independent samples (approximate where their cohorts share names).\n\n| horizon | score | AUC A | AUC B | p (B vs A) |\n| ---: | --- | ---: | ---: | ---: |");
    let keys: BTreeSet<(u32, crate::backtest::Score)> =
        pa.iter().chain(&pb).map(|r| (r.row.horizon_years, r.row.score)).collect();
    for (h, score) in keys {
        let find = |v: &[DiscriminationRecord]| {
            v.iter().find(|r| r.row.horizon_years == h && r.row.score == score).map(|r| r.row.clone())
        };
        let (x, y) = (find(&pa), find(&pb));
        let auc = |r: &Option<crate::backtest::DiscriminationRow>| r.as_ref().and_then(|r| r.auc);
        let se = |r: &Option<crate::backtest::DiscriminationRow>| r.as_ref().and_then(|r| r.auc_se);
        let p = match (auc(&y), se(&y), auc(&x), se(&x)) {
            (Some(b1), Some(s1), Some(a1), Some(s0)) => {
                crate::stats::auc_difference_independent(b1, s1, a1, s0).map(|(_, p)| p)
            }
            _ => None,
        };
        let f = |v: Option<f64>| v.map_or("-".to_string(), |v| format!("{v:.3}"));
        let _ = writeln!(
            w,
            "| {h}Y | {} | {} | {} | {} |",
            score.as_str(),
            f(auc(&x)),
            f(auc(&y)),
            p.map_or("-".to_string(), |p| format!("{p:.4}"))
        );
    }
    Ok(())
}
