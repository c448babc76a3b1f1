//! `hazardline merge`: finishes a run from its parts. Reads every part under the run's
//! `.shards` folder, checks that they are shards 1..N of one N made from this pipeline file
//! and that each shard's date ranges cover every date once, combines them in one canonical
//! order, and runs the pooled half of the pipeline into the run folder: the same files a
//! single run writes.

use super::part_folder::{merge_part_rows, read_meta, read_partition, verify_part, CurveTally};
use super::partition::{Partition, RowSinks};
use super::*;
use crate::parts::check_tiling;

/// Finishes a sharded run: reads every part under the run's `.shards` folder, checks that
/// they are shards 1..N of one N made from this pipeline file, and runs the pooled half of
/// the pipeline into the run folder.
pub fn merge(cfg: &RunConfig, opts: &RunOptions) -> Result<RunSummary> {
    share_heaps();
    let t0 = Instant::now();
    let mut timings = Vec::new();
    let mut ds = ingest(cfg, &mut timings)?;
    let ingest_counts = ds.counts.clone();
    let period = quote_period(&ds);
    let label = run_label(cfg, opts, period);
    let split = split_tables(cfg, &ds);
    if let Some(p) = &mut ds.cds {
        // The parts hold the calibrated rows; the merge needs only what the panel's rows leave
        // behind (counts, rejects, flags, the quote period): the rows themselves (2.6 GiB at
        // 38 M quotes) go before the parts are read.
        p.release_rows();
    }
    give_back_free_memory();
    let t = Instant::now();
    let dir = shards_dir(cfg, opts, &label)?;
    let (dirs, parts) = read_parts(&dir, &cfg.pipeline_path, &input_records(cfg, &ds.counts)?)?;
    let copies = if split { whole_years(&dirs, &parts)? } else { Vec::new() };
    let recorded: Vec<CurveTally> = parts
        .iter()
        .map(|p| CurveTally {
            curves: p.curves,
            curves_complete: p.curves_complete,
            max_abs_residual_bp: p.max_abs_residual_bp,
            curve_entities: p.curve_entities.iter().cloned().collect(),
        })
        .collect();
    let mut cal = combine(parts)?;
    let (rss, peak) = memory_mib();
    timings.push(partition::logged(("read parts".into(), t.elapsed().as_secs_f64(), rss, peak)));
    let params = calibration_params(cfg);
    let folder = RunFolder::create(cfg, opts, period)?;
    let meta = table_metadata(cfg, &params);
    let multi: BTreeSet<String> = cal.multi_currency.iter().cloned().collect();
    let mut sinks = RowSinks::create(
        &folder.tables(),
        &meta,
        Some(RowDigest::new(&multi, &cfg.stability)),
        Some(report_folds(cfg)?),
        split,
    )?;
    // The sensitivity rows (in the table's order since `combine`) go to their table now: held
    // there as a frame, they take far less memory than as rows while the curves stream.
    sinks.sensitivity_rows(std::mem::take(&mut cal.sensitivities))?;
    sinks.copied_years(copies.iter().map(|c| c.year).collect());
    let t = Instant::now();
    // The whole years' files are copied while the rows stream past (they are digested and
    // folded all the same).
    let tables = folder.tables();
    (cal.hazard, cal.residuals) = std::thread::scope(|s| {
        let copying = s.spawn(|| copy_whole_years(&copies, &tables));
        let merged = merge_part_rows(&dirs, &recorded, &mut sinks);
        let copied = copying.join().map_err(|_| Error::Internal("copying a part's files panicked".into()))?;
        copied.and(merged)
    })?;
    let (rss, peak) = memory_mib();
    timings.push(partition::logged(("merge curves".into(), t.elapsed().as_secs_f64(), rss, peak)));
    finish(cfg, ds, ingest_counts, cal, sinks, &multi, folder, &meta, timings, t0)
}

/// A year of CDS rows that one part holds whole: its files of the node, residual and
/// conversion tables (those it has) are the files a single run writes for that year, byte for
/// byte (same rows, same order, same row groups, same metadata), and the merge copies them.
#[derive(Debug)]
struct WholeYear {
    year: i32,
    /// (the part's file, the table's folder name, the file's name)
    files: Vec<(PathBuf, &'static str, String)>,
}

/// The years a part holds whole: with one entity shard only (with several, every shard has
/// rows in every year), the years from 1 January to 31 December inside one part's date range,
/// with the files the part wrote for them (rank 1 of the tables written by year: the CDS
/// rows). Parts whose date ranges end on year ends have every year whole.
fn whole_years(dirs: &[PathBuf], parts: &[Partition]) -> Result<Vec<WholeYear>> {
    use chrono::NaiveDate;
    if parts.iter().any(|p| p.shard != 1) {
        return Ok(Vec::new());
    }
    let tables = [
        (crate::tables::HazardCurveRow::NAME, "cds"),
        (crate::tables::ResidualRow::NAME, "bootstrap"),
        (crate::tables::QuoteConversionRow::NAME, "conversions"),
    ];
    let mut out: std::collections::BTreeMap<i32, WholeYear> = Default::default();
    for (dir, p) in dirs.iter().zip(parts) {
        let covers = |y: i32| {
            let (first, last) = (NaiveDate::from_ymd_opt(y, 1, 1), NaiveDate::from_ymd_opt(y, 12, 31));
            p.range.from.is_none_or(|f| Some(f) <= first) && p.range.to.is_none_or(|t| Some(t) >= last)
        };
        for (table, group) in tables {
            let folder = dir.join(table);
            if !folder.is_dir() {
                continue;
            }
            let entries = std::fs::read_dir(&folder).map_err(|e| Error::Read {
                path: folder.clone(),
                format: "folder",
                message: e.to_string(),
            })?;
            for e in entries.filter_map(|e| e.ok()) {
                let name = e.file_name().to_string_lossy().to_string();
                let year = name
                    .strip_prefix(&format!("1-{group}-"))
                    .and_then(|r| r.strip_suffix(".parquet"))
                    .and_then(|y| y.parse::<i32>().ok());
                if let Some(y) = year.filter(|y| covers(*y)) {
                    let w = out.entry(y).or_insert_with(|| WholeYear { year: y, files: Vec::new() });
                    if w.files.iter().any(|(f, _, _)| !f.starts_with(dir)) {
                        return Err(Error::Parts(format!(
                            "two parts hold the whole of {y}; their date ranges overlap; rerun them"
                        )));
                    }
                    w.files.push((e.path(), table, name));
                }
            }
        }
    }
    Ok(out.into_values().collect())
}

/// Copies the files of the whole years into the run's `tables` folder.
fn copy_whole_years(years: &[WholeYear], tables: &Path) -> Result<()> {
    for (from, table, name) in years.iter().flat_map(|y| &y.files) {
        let dir = tables.join(table);
        std::fs::create_dir_all(&dir).map_err(|e| Error::Write { path: dir.clone(), message: e.to_string() })?;
        let to = dir.join(name);
        std::fs::copy(from, &to).map_err(|e| Error::Write { path: to.clone(), message: e.to_string() })?;
    }
    let n: usize = years.iter().map(|y| y.files.len()).sum();
    tracing::info!(target: "hazardline::merge", years = years.len(), files = n, "copied the parts' whole years");
    Ok(())
}

fn read_parts(dir: &Path, pipeline: &Path, inputs: &[InputRecord]) -> Result<(Vec<PathBuf>, Vec<Partition>)> {
    let bad = |message: String| Error::Argument { name: "merge", message };
    let entries = std::fs::read_dir(dir).map_err(|e| {
        bad(format!(
            "no shard parts at {}: {e}; run `hazardline run PIPELINE --shard I/N` for every shard first",
            dir.display()
        ))
    })?;
    let mut folders: Vec<PathBuf> = entries
        .filter_map(|e| e.ok())
        .map(|e| e.path())
        .filter(|p| p.is_dir() && p.file_name().is_some_and(|n| n.to_string_lossy().starts_with("part-")))
        .collect();
    folders.sort();
    if folders.is_empty() {
        return Err(bad(format!("no shard parts in {}", dir.display())));
    }
    let (_, sha) = hash_file(pipeline)?;
    let mut metas = Vec::new();
    for f in &folders {
        let m = read_meta(f)?;
        if m.pipeline_sha256 != sha {
            return Err(bad(format!(
                "{} was made from another version of the pipeline file (SHA-256 {}, this one {sha}); rerun that shard",
                f.display(),
                m.pipeline_sha256
            )));
        }
        if m.version != env!("CARGO_PKG_VERSION") {
            return Err(bad(format!(
                "{} was made by hazardline {}, this is {}; rerun that shard",
                f.display(),
                m.version,
                env!("CARGO_PKG_VERSION")
            )));
        }
        if m.source_revision != crate::tables::manifest::SOURCE_REVISION {
            return Err(bad(format!(
                "{} was made by a build of source revision {}, this is {}; rerun that shard with this build",
                f.display(),
                if m.source_revision.is_empty() { "unknown" } else { &m.source_revision },
                crate::tables::manifest::SOURCE_REVISION
            )));
        }
        metas.push(m);
    }
    // Each part's files hashed and counted against its partition.json, the parts side by side.
    {
        use rayon::prelude::*;
        let checks: Vec<Result<()>> = folders.par_iter().zip(&metas).map(|(f, m)| verify_part(f, m, inputs)).collect();
        // The first part's refusal, in folder order, whichever thread finished first.
        checks.into_iter().collect::<Result<Vec<()>>>()?;
    }
    let n = metas[0].shards;
    if let Some(m) = metas.iter().find(|m| m.shards != n) {
        return Err(bad(format!("{} holds parts of {n} and of {} shards; keep one set", dir.display(), m.shards)));
    }
    let mut keyed: Vec<(u32, DateRange, PathBuf)> = Vec::new();
    for (m, f) in metas.iter().zip(folders) {
        keyed.push((m.shard, m.range(&f.join("partition.json"))?, f));
    }
    // Parts in shard order, each shard's date ranges in date order (an open start first).
    keyed.sort_by_key(|k| (k.0, k.1.from));
    let lacking: Vec<String> =
        (1..=n).filter(|i| !keyed.iter().any(|k| k.0 == *i)).map(|i| format!("{i}/{n}")).collect();
    if !lacking.is_empty() {
        return Err(bad(format!("{}: shards {} are missing; run them, then merge", dir.display(), lacking.join(", "))));
    }
    for i in 1..=n {
        let ranges: Vec<DateRange> = keyed.iter().filter(|k| k.0 == i).map(|k| k.1).collect();
        check_tiling(&ranges).map_err(|m| bad(format!("{}: shard {i}/{n}: {m}", dir.display())))?;
    }
    let dirs: Vec<PathBuf> = keyed.into_iter().map(|(_, _, f)| f).collect();
    let parts = dirs.iter().map(|f| read_partition(f).map(|(_, p)| p)).collect::<Result<Vec<_>>>()?;
    Ok((dirs, parts))
}

/// The rows of every part, in one canonical order (a curve's rows stay in their order: each
/// curve is computed in one part; the node and residual rows are ordered by
/// [`RowSinks::finish`]).
fn combine(parts: Vec<Partition>) -> Result<Partition> {
    let mut all = Partition { max_abs_residual_bp: 0.0, ..Default::default() };
    let mut dates: Vec<(chrono::NaiveDate, chrono::NaiveDate)> = Vec::new();
    let mut entities = BTreeSet::new();
    let mut multi = BTreeSet::new();
    // Vec::append into an empty vector moves nothing but still copies: the first part's
    // vectors are taken over whole. (The parts' node and residual rows are not here: the
    // merge streams them, `merge_part_rows`.)
    fn join<T>(all: &mut Vec<T>, part: &mut Vec<T>) {
        if all.is_empty() {
            std::mem::swap(all, part);
        } else {
            all.append(part);
        }
    }
    // The market move on an entity's first curve in a date range's part is from its last
    // curve in an earlier part of the same shard (parts come in shard, then date order).
    let mut carry: std::collections::HashMap<crate::tables::Label, std::collections::BTreeMap<u32, f64>> =
        Default::default();
    let mut shard = None;
    for mut p in parts {
        if shard != Some(p.shard) {
            carry.clear();
            shard = Some(p.shard);
        }
        for e in p.edges.iter().filter(|e| !e.last) {
            if let Some(prev) = carry.get(&e.entity) {
                all.market.extend(crate::stability::spread_move(&e.entity, e.date, prev, &e.spreads));
            }
        }
        for e in p.edges.drain(..).filter(|e| e.last) {
            carry.insert(e.entity, e.spreads);
        }
        join(&mut all.params, &mut p.params);
        join(&mut all.basis, &mut p.basis);
        join(&mut all.sensitivities, &mut p.sensitivities);
        join(&mut all.discount, &mut p.discount);
        join(&mut all.rejects, &mut p.rejects);
        all.curve_obs.append(std::mem::take(&mut p.curve_obs));
        join(&mut all.market, &mut p.market);
        for (k, (r, mut v)) in p.members.into_iter().enumerate() {
            match all.members.get_mut(k) {
                Some((r0, v0)) if r0.to_bits() == r.to_bits() => v0.append(&mut v),
                Some((r0, _)) => {
                    return Err(Error::Parts(format!(
                    "parts disagree on the recovery scenarios ({r0} and {r}); rerun every shard with one pipeline file"
                )))
                }
                None => all.members.push((r, v)),
            }
        }
        all.curves += p.curves;
        all.curves_complete += p.curves_complete;
        all.max_abs_residual_bp = all.max_abs_residual_bp.max(p.max_abs_residual_bp);
        dates.extend(p.curve_dates);
        entities.extend(p.curve_entities);
        multi.extend(p.multi_currency);
    }
    all.curve_dates = dates.iter().map(|d| d.0).min().zip(dates.iter().map(|d| d.1).max());
    all.curve_entities = entities.into_iter().collect();
    all.multi_currency = multi.into_iter().collect();
    // The node and residual rows are put in order by the sinks they go to.
    all.params.sort_by(|a, b| (a.date, &a.entity, &a.currency).cmp(&(b.date, &b.entity, &b.currency)));
    all.basis.sort_by(|a, b| (a.date, &a.entity, &a.currency).cmp(&(b.date, &b.entity, &b.currency)));
    crate::tables::sort_sensitivities(&mut all.sensitivities);
    all.rejects.sort_by(|a, b| (a.table, &a.source, a.row).cmp(&(b.table, &b.source, b.row)));
    Ok(all)
}
