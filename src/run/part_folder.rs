//! A part folder (`<label>.shards/part-I-of-N[-from-..-to-..]/`): what a `run --shard` /
//! `--dates` part writes ([`write_partition`]: its tables and `partition.json`, under a
//! temporary name until whole) and what `merge` reads back ([`read_partition`], and
//! [`merge_part_rows`] for the node and residual rows, streamed). Each table of a part is
//! written by its home in `tables`, as the run's tables are, so floats and labels come back
//! bit for bit.

use super::partition::{Partition, RowSinks};
use crate::backtest;
use crate::error::{Error, Result};
use crate::parts::{DateRange, Shard};
use crate::tables::manifest::{hash_file, InputRecord};
use crate::tables::parts::{EdgeRow, MemberRecord};
use crate::tables::{self, file_of, readback, HazardCurveRow, ResidualRow, Table};
use crate::text::{CurveSource, FitMethod, RowStatus};
use chrono::NaiveDate;
use std::path::{Path, PathBuf};

/// What a partition says about itself (`partition.json`).
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct PartitionMeta {
    pub tool: String,
    pub version: String,
    /// The source revision of the build that made the part ([`crate::tables::manifest::SOURCE_REVISION`]).
    #[serde(default)]
    pub source_revision: String,
    /// SHA-256 of the pipeline file the shard ran.
    pub pipeline_sha256: String,
    pub shard: u32,
    pub shards: u32,
    pub curves: usize,
    pub curves_complete: usize,
    pub max_abs_residual_bp: f64,
    /// First and last CDS curve date of the shard (ISO dates).
    pub curve_dates: Option<(String, String)>,
    /// Entities with at least one CDS curve.
    pub curve_entities: Vec<String>,
    /// Entities quoted in more than one currency.
    pub multi_currency: Vec<String>,
    /// Recoveries of the backtest members, base first.
    pub recoveries: Vec<f64>,
    /// First and last curve date of the part's date range (ISO dates; None: open).
    #[serde(default)]
    pub dates_from: Option<String>,
    #[serde(default)]
    pub dates_to: Option<String>,
    /// The inputs the part read, as the run's manifest lists them: `merge` refuses a part made
    /// from inputs that have changed since.
    pub inputs: Vec<InputRecord>,
    /// Every table file of the part with its size, SHA-256 and rows: `merge` refuses a part
    /// whose files differ from these, or that holds a file not listed.
    #[serde(default)]
    pub files: Vec<PartFile>,
}

/// A table file of a part folder as it was written.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct PartFile {
    pub name: String,
    pub bytes: u64,
    pub sha256: String,
    pub rows: usize,
}

/// The `.parquet` files of a part folder, by name: its tables' files, and the files of the
/// tables written as folders (by year), named `<table>/<file>`.
fn part_files(dir: &Path) -> Result<Vec<PathBuf>> {
    let list = |d: &Path| -> Result<Vec<PathBuf>> {
        let entries = std::fs::read_dir(d).map_err(|e| Error::Read {
            path: d.to_path_buf(),
            format: "folder",
            message: e.to_string(),
        })?;
        Ok(entries.filter_map(|e| e.ok()).map(|e| e.path()).collect())
    };
    let parquet = |p: &PathBuf| p.is_file() && p.extension().is_some_and(|x| x == "parquet");
    let mut files = Vec::new();
    for p in list(dir)? {
        if p.is_dir() {
            files.extend(list(&p)?.into_iter().filter(parquet));
        } else if parquet(&p) {
            files.push(p);
        }
    }
    files.sort();
    Ok(files)
}

/// A part file's name as `partition.json` records it: relative to the part folder.
fn part_file_name(dir: &Path, p: &Path) -> String {
    p.strip_prefix(dir).unwrap_or(p).to_string_lossy().replace(std::path::MAIN_SEPARATOR, "/")
}

/// What a part folder's table files are now.
fn describe_files(dir: &Path) -> Result<Vec<PartFile>> {
    part_files(dir)?
        .iter()
        .map(|p| {
            let (bytes, sha256) = hash_file(p)?;
            Ok(PartFile { name: part_file_name(dir, p), bytes, sha256, rows: readback::rows_in_file(p)? })
        })
        .collect()
}

/// Checks a part folder against its `partition.json`: impossible shard numbers, inputs that
/// changed since the part ran (`inputs`: this merge's), and table files that differ from
/// those recorded (size, SHA-256, rows) or are not listed. The message names the part, the
/// file and what differs.
pub fn verify_part(dir: &Path, meta: &PartitionMeta, inputs: &[InputRecord]) -> Result<()> {
    let refuse = |what: String| Err(Error::Parts(format!("{}: {what}; rerun this part", dir.display())));
    if meta.shards == 0 || meta.shard == 0 || meta.shard > meta.shards {
        return refuse(format!("partition.json says shard {} of {}, which cannot be", meta.shard, meta.shards));
    }
    if meta.inputs != inputs {
        let changed = inputs
            .iter()
            .filter(|i| !meta.inputs.contains(i))
            .chain(meta.inputs.iter().filter(|i| !inputs.contains(i)))
            .map(|i| format!("{} ({})", i.path, i.table))
            .collect::<std::collections::BTreeSet<_>>();
        return refuse(format!(
            "the inputs changed since this part ran: {}",
            changed.into_iter().collect::<Vec<_>>().join(", ")
        ));
    }
    let present: Vec<String> = part_files(dir)?.iter().map(|p| part_file_name(dir, p)).collect();
    if let Some(extra) = present.iter().find(|n| !meta.files.iter().any(|f| &f.name == *n)) {
        return refuse(format!("{extra} is not a file the part wrote"));
    }
    for f in &meta.files {
        if !present.contains(&f.name) {
            return refuse(format!("{} is missing", f.name));
        }
        let p = dir.join(&f.name);
        let (bytes, sha256) = hash_file(&p)?;
        if bytes != f.bytes || sha256 != f.sha256 {
            return refuse(format!(
                "{} differs from what the part wrote ({bytes} bytes, SHA-256 {sha256}; recorded {} bytes, SHA-256 {})",
                f.name, f.bytes, f.sha256
            ));
        }
        let rows = readback::rows_in_file(&p)?;
        if rows != f.rows {
            return refuse(format!("{} holds {rows} rows; the part wrote {}", f.name, f.rows));
        }
    }
    Ok(())
}

impl PartitionMeta {
    /// The part's date range.
    pub fn range(&self, path: &Path) -> Result<DateRange> {
        let date = |s: &Option<String>| s.as_deref().map(|s| parse_date(path, s)).transpose();
        Ok(DateRange { from: date(&self.dates_from)?, to: date(&self.dates_to)? })
    }
}

/// A shard's part folder being written: its work folder beside `dir`, swapped in whole by
/// [`write_partition`], and the lock on it (`folders::Target`), so a folder that exists is
/// whole and two processes never write one part.
pub struct PartFolder {
    pub target: super::folders::Target,
}

impl PartFolder {
    pub fn create(dir: &Path) -> Result<PartFolder> {
        Ok(PartFolder { target: super::folders::Target::open(dir)? })
    }

    /// The sinks of the part's node and residual rows (no digest: the merge digests them),
    /// written as the run writes its own (`meta`: the run's table metadata; `split`: by year
    /// when the run's are), so that a year of CDS rows the part holds whole is, byte for byte,
    /// the file the run writes for that year, and the merge copies it.
    pub fn sinks<'a>(&self, meta: &[(String, String)], split: bool) -> Result<RowSinks<'a>> {
        RowSinks::create(self.target.work(), meta, None, None, split)
    }
}

/// Writes a part: closes its node and residual tables (`sinks`), writes its other tables and
/// `partition.json` into the work folder, and renames the folder into place.
pub fn write_partition(
    folder: PartFolder,
    sinks: RowSinks,
    mut part: Partition,
    shard: Shard,
    pipeline_sha256: &str,
    inputs: Vec<InputRecord>,
) -> Result<()> {
    let PartFolder { target } = folder;
    let work = target.work().to_path_buf();
    let none: &[(String, String)] = &[];
    sinks.finish(
        std::mem::take(&mut part.hazard),
        std::mem::take(&mut part.residuals),
        std::mem::take(&mut part.sensitivities),
    )?;
    tables::write(&part.params, &work, none)?;
    tables::write(&part.basis, &work, none)?;
    tables::write(&part.discount, &work, none)?;
    tables::write(&part.rejects, &work, none)?;
    tables::parts::write_series(&part.curve_obs, &work)?;
    tables::write(&part.market, &work, none)?;
    tables::write(&tables::parts::edge_rows(&part.edges), &work, none)?;
    let members: Vec<MemberRecord> = part
        .members
        .iter()
        .flat_map(|(r, v)| v.iter().map(move |o| MemberRecord { recovery: *r, member: o.clone() }))
        .collect();
    tables::write(&members, &work, none)?;

    let meta = PartitionMeta {
        tool: "hazardline".into(),
        version: env!("CARGO_PKG_VERSION").into(),
        source_revision: crate::tables::manifest::SOURCE_REVISION.into(),
        pipeline_sha256: pipeline_sha256.to_string(),
        shard: shard.index,
        shards: shard.count,
        curves: part.curves,
        curves_complete: part.curves_complete,
        max_abs_residual_bp: part.max_abs_residual_bp,
        curve_dates: part.curve_dates.map(|(a, b)| (a.to_string(), b.to_string())),
        curve_entities: part.curve_entities.clone(),
        multi_currency: part.multi_currency.clone(),
        recoveries: part.members.iter().map(|(r, _)| *r).collect(),
        dates_from: part.range.from.map(|d| d.to_string()),
        dates_to: part.range.to.map(|d| d.to_string()),
        inputs,
        files: describe_files(&work)?,
    };
    let text = serde_json::to_string_pretty(&meta)
        .map_err(|e| Error::Encode { what: "partition.json", message: e.to_string() })?;
    crate::tables::manifest::write_text(&work.join("partition.json"), &(text + "\n"))?;
    target.commit().map(|_| ())
}

/// Reads `partition.json` of a partition folder.
pub fn read_meta(dir: &Path) -> Result<PartitionMeta> {
    let path = dir.join("partition.json");
    let text = std::fs::read_to_string(&path).map_err(|e| Error::Read {
        path: path.clone(),
        format: "JSON",
        message: e.to_string(),
    })?;
    serde_json::from_str(&text).map_err(|e| Error::Read { path, format: "JSON", message: e.to_string() })
}

fn parse_date(path: &Path, s: &str) -> Result<NaiveDate> {
    NaiveDate::parse_from_str(s, "%Y-%m-%d").map_err(|e| Error::Read {
        path: path.to_path_buf(),
        format: "JSON",
        message: format!("date `{s}`: {e}"),
    })
}

/// Streams the node and residual rows of the parts in `dirs` (shard order) into `sinks`: the
/// CDS rows, which every part holds first and in the tables' order, by a k-way merge on (date,
/// entity, currency) that keeps a curve's rows together, read a slice at a time; the rows
/// after them (the bond and CIR fits') are returned, for [`RowSinks::finish`] to sort in.
///
/// Each part's CDS node and residual rows are tallied on the way ([`CurveTally`]) and the
/// tally checked against the counts its `partition.json` records: a count edited there, or
/// one that does not belong to the tables beside it, stops the merge naming the part.
pub fn merge_part_rows(
    dirs: &[PathBuf],
    recorded: &[CurveTally],
    sinks: &mut RowSinks,
) -> Result<(Vec<HazardCurveRow>, Vec<ResidualRow>)> {
    let mut tallies: Vec<CurveTally> = dirs.iter().map(|_| CurveTally::default()).collect();
    type CurveKey = (NaiveDate, tables::Label, tables::Label, Option<tables::Label>, Option<tables::Label>);
    let mut open: Vec<Option<(CurveKey, bool)>> = vec![None; dirs.len()];
    let cursors = dirs
        .iter()
        .map(|d| readback::cursor::<HazardCurveRow>(&readback::table_path(d, HazardCurveRow::NAME)))
        .collect::<Result<Vec<_>>>()?;
    let hazard = merge_sorted(
        cursors,
        |r| r.source == CurveSource::Cds,
        |r| (r.date, r.entity.clone(), r.currency.clone(), r.seniority.clone(), r.doc_clause.clone()),
        |i, r| {
            let key = (r.date, r.entity.clone(), r.currency.clone(), r.seniority.clone(), r.doc_clause.clone());
            let ok = r.status == RowStatus::Ok;
            match &mut open[i] {
                Some((k, all_ok)) if *k == key => *all_ok &= ok,
                slot => {
                    if let Some((_, true)) = slot {
                        tallies[i].curves_complete += 1;
                    }
                    tallies[i].curves += 1;
                    tallies[i].curve_entities.insert(r.entity.to_string());
                    *slot = Some((key, ok));
                }
            }
        },
        |rows| sinks.nodes(rows),
    )?;
    for (t, o) in tallies.iter_mut().zip(open) {
        if let Some((_, true)) = o {
            t.curves_complete += 1;
        }
    }
    let cursors = dirs
        .iter()
        .map(|d| readback::cursor::<ResidualRow>(&readback::table_path(d, ResidualRow::NAME)))
        .collect::<Result<Vec<_>>>()?;
    let residuals = merge_sorted(
        cursors,
        |r| r.method == FitMethod::Bootstrap,
        |r| (r.date, r.entity.clone(), r.currency.clone(), r.seniority.clone(), r.doc_clause.clone()),
        |i, r| {
            if r.status == RowStatus::Ok {
                tallies[i].max_abs_residual_bp = tallies[i].max_abs_residual_bp.max(r.residual_bp.abs());
            }
        },
        |rows| sinks.residual_rows(rows),
    )?;
    for ((dir, found), said) in dirs.iter().zip(&tallies).zip(recorded) {
        if let Some(what) = found.differs_from(said) {
            return Err(Error::Parts(format!(
                "{}: partition.json does not match the part's own tables: {what}; rerun this part",
                dir.display()
            )));
        }
    }
    Ok((hazard, residuals))
}

/// What a part's CDS node and residual rows say about its curves, or what its
/// `partition.json` records: the curves (one per date, entity and currency), those with every
/// node `ok`, the largest |residual| on `ok` repriced quotes, and the entities with a curve.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct CurveTally {
    pub curves: usize,
    pub curves_complete: usize,
    pub max_abs_residual_bp: f64,
    pub curve_entities: std::collections::BTreeSet<String>,
}

impl CurveTally {
    /// The first way the tables' tally `self` differs from the recorded one, in words.
    fn differs_from(&self, recorded: &CurveTally) -> Option<String> {
        if self.curves != recorded.curves {
            return Some(format!("it records {} curves, the node table holds {}", recorded.curves, self.curves));
        }
        if self.curves_complete != recorded.curves_complete {
            return Some(format!(
                "it records {} complete curves, the node table holds {}",
                recorded.curves_complete, self.curves_complete
            ));
        }
        // partition.json's number went through a decimal text and back (to within an ulp or two).
        let (a, b) = (self.max_abs_residual_bp, recorded.max_abs_residual_bp);
        if !((a - b).abs() <= 1e-12 * a.abs().max(b.abs())) {
            return Some(format!(
                "it records a largest |residual| of {} bp, the residual table's is {} bp",
                recorded.max_abs_residual_bp, self.max_abs_residual_bp
            ));
        }
        // Recorded are the entities with a usable curve; the node table also holds curves
        // that failed, so it may name more.
        let odd: Vec<&String> = recorded.curve_entities.difference(&self.curve_entities).collect();
        if !odd.is_empty() {
            return Some(format!("it records curves of {odd:?}, which the node table does not hold"));
        }
        None
    }
}

/// Rows handed on at a time by [`merge_sorted`].
const MERGED_ROWS: usize = 1 << 16;

/// Merges the leading rows (`leads`) of sorted cursors by `key` into `emit`, a run of equal
/// keys at a time (ties go to the earlier cursor, as a stable sort of the concatenation would
/// have it); returns every row after the leading ones, cursor by cursor.
/// `seen` is shown every leading row with the index of its cursor.
fn merge_sorted<T, K: Ord>(
    mut cursors: Vec<readback::RowCursor<T>>,
    leads: impl Fn(&T) -> bool,
    key: impl Fn(&T) -> K,
    mut seen: impl FnMut(usize, &T),
    mut emit: impl FnMut(Vec<T>) -> Result<()>,
) -> Result<Vec<T>> {
    let mut out = Vec::with_capacity(MERGED_ROWS);
    loop {
        let mut best: Option<(usize, K)> = None;
        for (i, c) in cursors.iter_mut().enumerate() {
            if let Some(r) = c.peek()?.filter(|r| leads(r)) {
                let k = key(r);
                if best.as_ref().is_none_or(|(_, b)| k < *b) {
                    best = Some((i, k));
                }
            }
        }
        let Some((i, k)) = best else { break };
        while cursors[i].peek()?.is_some_and(|r| leads(r) && key(r) == k) {
            if let Some(r) = cursors[i].next_row()? {
                seen(i, &r);
                out.push(r);
            }
        }
        if out.len() >= MERGED_ROWS {
            emit(std::mem::replace(&mut out, Vec::with_capacity(MERGED_ROWS)))?;
        }
    }
    emit(out)?;
    let mut rest = Vec::new();
    for c in cursors.iter_mut() {
        while let Some(r) = c.next_row()? {
            rest.push(r);
        }
    }
    Ok(rest)
}

/// Reads a part folder back: its `partition.json` and every table but the node and residual
/// rows, which stay on disk for [`merge_part_rows`] to stream.
pub fn read_partition(dir: &Path) -> Result<(PartitionMeta, Partition)> {
    let meta = read_meta(dir)?;
    let json = dir.join("partition.json");
    let mut part = Partition {
        params: tables::read(dir)?,
        basis: tables::read(dir)?,
        sensitivities: tables::read(dir)?,
        discount: tables::read(dir)?,
        rejects: tables::read(dir)?,
        market: tables::read(dir)?,
        edges: tables::parts::edges_of(&tables::read::<EdgeRow>(dir)?),
        curves: meta.curves,
        curves_complete: meta.curves_complete,
        max_abs_residual_bp: meta.max_abs_residual_bp,
        curve_entities: meta.curve_entities.clone(),
        multi_currency: meta.multi_currency.clone(),
        shard: meta.shard,
        range: meta.range(&json)?,
        ..Default::default()
    };
    part.curve_dates = match &meta.curve_dates {
        Some((a, b)) => Some((parse_date(&json, a)?, parse_date(&json, b)?)),
        None => None,
    };
    tables::parts::read_series(dir, &mut part.curve_obs)?;
    let path = file_of::<MemberRecord>(dir);
    let mut members: Vec<(f64, Vec<backtest::Observation>)> =
        meta.recoveries.iter().map(|r| (*r, Vec::new())).collect();
    for (i, m) in tables::read_from::<MemberRecord>(&path)?.into_iter().enumerate() {
        let rec = m.recovery;
        let slot = members.iter_mut().find(|(x, _)| x.to_bits() == rec.to_bits()).ok_or_else(|| Error::Read {
            path: path.clone(),
            format: "Parquet",
            message: format!("row {}: recovery {rec} is not listed in partition.json", i + 1),
        })?;
        slot.1.push(m.member);
    }
    part.members = members;
    Ok((meta, part))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::tables::{hazard_writer, residual_writer, sort_hazard};

    fn node(day: u32, entity: &str, source: CurveSource, tenor: &str) -> HazardCurveRow {
        let date = NaiveDate::from_ymd_opt(2024, 5, day).unwrap();
        HazardCurveRow {
            date,
            entity: entity.into(),
            currency: "EUR".into(),
            seniority: None,
            doc_clause: None,
            source,
            tenor: tenor.into(),
            maturity: date,
            node_date: date,
            hazard: Some(f64::from(day) / 100.0),
            survival: None,
            status: crate::text::RowStatus::Ok,
            recovery: 0.4,
            iterations: 3,
            detail: None,
        }
    }

    #[test]
    fn merging_parts_gives_the_order_of_one_sort() {
        // Three parts, each with its CDS curves in (date, entity) order and then its bond
        // nodes; entity names spread over the parts. The merged CDS rows, then the sorted rest,
        // must be the concatenation put through the table's own stable sort.
        let dir = tempfile::tempdir().unwrap();
        let names = [["Ash", "Fir"], ["Beech", "Oak"], ["Cedar", "Yew"]];
        let mut all = Vec::new();
        let mut dirs = Vec::new();
        let mut recorded = Vec::new();
        for (k, pair) in names.iter().enumerate() {
            let mut rows = Vec::new();
            let mut tally = CurveTally::default();
            for day in [2, 3, 6, 7] {
                for e in pair {
                    if (day + k as u32) % 5 != 0 {
                        rows.extend(["1Y", "5Y", "10Y"].iter().map(|t| node(day, e, CurveSource::Cds, t)));
                        tally.curves += 1;
                        tally.curves_complete += 1;
                        tally.curve_entities.insert(e.to_string());
                    }
                }
            }
            recorded.push(tally);
            rows.push(node(3, pair[1], CurveSource::Bond, "bond"));
            rows.push(node(2, pair[0], CurveSource::Bond, "bond"));
            rows.sort_by_key(|r| r.source != CurveSource::Cds);
            let d = dir.path().join(format!("part-{k}"));
            let mut w = hazard_writer(&d.join("hazard_curves.parquet"), &[]).unwrap();
            w.push(rows.iter().cloned()).unwrap();
            w.finish().unwrap();
            residual_writer(&d.join("calibration_residuals.parquet"), &[]).unwrap().finish().unwrap();
            all.extend(rows);
            dirs.push(d);
        }
        // A count that does not match the part's rows stops the merge, naming the part.
        let mut wrong = recorded.clone();
        wrong[1].curves_complete -= 1;
        let mut sinks = RowSinks::create(&dir.path().join("wrong"), &[], None, None, false).unwrap();
        let e = merge_part_rows(&dirs, &wrong, &mut sinks).unwrap_err().to_string();
        assert!(e.contains("part-1") && e.contains("complete curves"), "{e}");
        let out = dir.path().join("out");
        let mut sinks = RowSinks::create(&out, &[], None, None, false).unwrap();
        let (rest, residuals) = merge_part_rows(&dirs, &recorded, &mut sinks).unwrap();
        assert_eq!((rest.len(), residuals.len()), (6, 0));
        sinks.finish(rest, residuals, Vec::new()).unwrap();
        sort_hazard(&mut all);
        assert_eq!(crate::tables::read::<HazardCurveRow>(&out).unwrap(), all);
    }
}
