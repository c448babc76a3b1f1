//! Entity shards and `merge`: a run split into shards and merged writes the same files, byte
//! for byte, as the single run (run.log, which holds timings, aside).

use crate::support::files;
use assert_cmd::Command;
use std::path::Path;

fn hazardline(args: &[&str]) -> assert_cmd::assert::Assert {
    Command::cargo_bin("hazardline").unwrap().args(args).assert()
}

/// The error text of a command that must stop with exit 2 (bad input or config).
fn refused(args: &[&str]) -> String {
    String::from_utf8(hazardline(args).code(2).get_output().stderr.clone()).unwrap()
}

/// Replaces `from` with `to` in the pipeline file.
fn edit(pipeline: &str, from: &str, to: &str) {
    let text = std::fs::read_to_string(pipeline).unwrap().replace(from, to);
    std::fs::write(pipeline, text).unwrap();
}

/// A small invented universe with bonds, CIR names, defaults, grades and a cohort history.
fn universe(dir: &Path) -> String {
    hazardline(&["demo", dir.to_str().unwrap(), "--entities", "30", "--years", "2"]).success();
    dir.join("pipeline.toml").to_string_lossy().to_string()
}

fn single(pipeline: &str, out: &Path) -> std::collections::BTreeMap<String, Vec<u8>> {
    hazardline(&["run", pipeline, "--out", out.to_str().unwrap(), "--label", "r"]).success();
    files(&out.join("demo/r"), &["run.log"])
}

fn sharded(pipeline: &str, out: &Path, n: u32, order: &[u32]) -> std::collections::BTreeMap<String, Vec<u8>> {
    for i in order {
        hazardline(&["run", pipeline, "--out", out.to_str().unwrap(), "--label", "r", "--shard", &format!("{i}/{n}")])
            .success();
    }
    hazardline(&["merge", pipeline, "--out", out.to_str().unwrap(), "--label", "r"]).success();
    files(&out.join("demo/r"), &["run.log"])
}

fn assert_same(
    a: &std::collections::BTreeMap<String, Vec<u8>>,
    b: &std::collections::BTreeMap<String, Vec<u8>>,
    what: &str,
) {
    assert_eq!(a.keys().collect::<Vec<_>>(), b.keys().collect::<Vec<_>>(), "{what}: other files");
    for (k, v) in a {
        assert!(b[k] == *v, "{what}: {k} differs from the single run");
    }
}

#[test]
fn three_shards_merge_into_the_single_runs_bytes() {
    let dir = tempfile::tempdir().unwrap();
    let pipeline = universe(&dir.path().join("data"));
    let one = single(&pipeline, &dir.path().join("single"));
    assert!(one.len() > 25, "{} files", one.len());
    // Shards run in any order, as array jobs would.
    let three = sharded(&pipeline, &dir.path().join("three"), 3, &[3, 1, 2]);
    assert_same(&one, &three, "3 shards");
    // Every shard holds some entities and none twice: the parts' entity lists partition them.
    let parts = dir.path().join("three/demo/r.shards");
    let mut seen = Vec::new();
    for i in 1..=3 {
        let m = hazardline::run::part_folder::read_meta(&parts.join(format!("part-{i:04}-of-0003"))).unwrap();
        assert!(!m.curve_entities.is_empty(), "shard {i} is empty");
        seen.extend(m.curve_entities);
    }
    let n = seen.len();
    seen.sort();
    seen.dedup();
    assert_eq!(seen.len(), n, "an entity is in two shards");
    assert_eq!(seen.len(), 30);

    // A missing shard stops the merge (exit 2) and names it.
    std::fs::remove_dir_all(parts.join("part-0002-of-0003")).unwrap();
    let err = refused(&["merge", &pipeline, "--out", dir.path().join("three").to_str().unwrap(), "--label", "r"]);
    assert!(err.contains("2/3") && err.contains("missing"), "{err}");
}

/// Quarterly cohorts and pooled PD-quantile bands: the cohort dates and the band edges are
/// properties of the whole universe, which no shard sees alone.
#[test]
fn pooled_settings_merge_exactly_and_a_changed_pipeline_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let pipeline = universe(&dir.path().join("data"));
    edit(
        &pipeline,
        "horizons = [1, 3]",
        "horizons = [1, 3]\ncohorts = \"quarterly\"\nbuckets = \"pd_bands\"\npd_quantiles = 4\nlookback_days = 20",
    );
    let one = single(&pipeline, &dir.path().join("single"));
    assert!(String::from_utf8(one["report.md"].clone()).unwrap().contains("pd ["), "the report shows PD bands");
    let two = sharded(&pipeline, &dir.path().join("two"), 2, &[1, 2]);
    assert_same(&one, &two, "2 shards");

    // Parts made from another pipeline file are refused.
    edit(&pipeline, "pd_quantiles = 4", "pd_quantiles = 3");
    let err = refused(&["merge", &pipeline, "--out", dir.path().join("two").to_str().unwrap(), "--label", "r"]);
    assert!(err.contains("another version of the pipeline file"), "{err}");
}

#[test]
fn a_bad_shard_argument_is_refused() {
    let out = hazardline(&["run", "x.toml", "--shard", "4/3"]).failure();
    let err = String::from_utf8(out.get_output().stderr.clone()).unwrap();
    assert!(err.contains("between 1 and N"), "{err}");
}

/// More shards than entities: most parts are empty, and the merge still equals the single
/// run (the hand-made fixture: bonds, a bad discount row, rejects of every kind).
#[test]
fn empty_shards_merge_too() {
    let dir = tempfile::tempdir().unwrap();
    let pipeline = crate::support::repo().join("tests/fixtures/sample.toml").to_string_lossy().to_string();
    let out = dir.path().join("single");
    hazardline(&["run", &pipeline, "--out", out.to_str().unwrap(), "--label", "r"]).success();
    let one = files(&out.join("sample/r"), &["run.log"]);
    let sh = dir.path().join("nine");
    let mut empty = 0;
    for i in 1..=9 {
        let o = hazardline(&[
            "run",
            &pipeline,
            "--out",
            sh.to_str().unwrap(),
            "--label",
            "r",
            "--shard",
            &format!("{i}/9"),
        ])
        .success();
        empty += usize::from(String::from_utf8(o.get_output().stdout.clone()).unwrap().contains(" 0 entities"));
    }
    assert!(empty >= 3, "{empty} empty shards");
    hazardline(&["merge", &pipeline, "--out", sh.to_str().unwrap(), "--label", "r"]).success();
    assert_same(&one, &files(&sh.join("sample/r"), &["run.log"]), "9 shards");
}

fn part(pipeline: &str, out: &Path, shard: &str, dates: &str) {
    hazardline(&["run", pipeline, "--out", out.to_str().unwrap(), "--label", "r", "--shard", shard, "--dates", dates])
        .success();
}

/// Parts by curve date range, crossed with entity shards: the daily CIR fits chain day to day
/// (free mode), the cohort dates (quarterly, first business day of the quarter) have curves
/// in the look-back before a range's start, and the market moves run across the boundaries.
/// The shards split their dates differently, one boundary on a cohort date, one the day after.
#[test]
fn date_ranges_merge_into_the_single_runs_bytes() {
    let dir = tempfile::tempdir().unwrap();
    let pipeline = universe(&dir.path().join("data"));
    edit(&pipeline, "fixed_kappa_sigma", "free");
    edit(&pipeline, "horizons = [1, 3]", "horizons = [1, 3]\ncohorts = \"quarterly\"\nlookback_days = 20");
    // Every other entity has no quote on the cohort date 2015-10-01: its member of that cohort
    // uses its curve of the day before, which lies before the part that starts on that date.
    let quotes = dir.path().join("data/cds_quotes/quotes_2015.parquet");
    let mut df = hazardline::tables::readback::read_frame(&quotes).unwrap();
    let dates = hazardline::tables::readback::dates(&df, &quotes, "date").unwrap();
    let names = hazardline::tables::readback::strs(&df, &quotes, "entity").unwrap();
    let cohort = chrono::NaiveDate::from_ymd_opt(2015, 10, 1).unwrap();
    let keep: Vec<bool> = dates
        .iter()
        .zip(&names)
        .map(|(d, e)| !(*d == Some(cohort) && e.as_ref().is_some_and(|e| e.len() % 2 == 0)))
        .collect();
    let dropped = keep.iter().filter(|k| !**k).count();
    let keep: polars::prelude::BooleanChunked = keep.into_iter().map(Some).collect();
    assert!(dropped > 20, "{dropped} quotes dropped");
    df = df.filter(&keep).unwrap();
    hazardline::tables::parquet::write_parquet(&mut df, &quotes, &[]).unwrap();

    let one = single(&pipeline, &dir.path().join("single"));
    let out = dir.path().join("parts");
    for (shard, dates) in [
        ("2/2", "2016-01-05.."),
        ("1/2", "..2015-06-30"),
        ("2/2", "..2016-01-04"),
        ("1/2", "2015-10-01.."),
        ("1/2", "2015-07-01..2015-09-30"),
    ] {
        part(&pipeline, &out, shard, dates);
    }
    let parts = out.join("demo/r.shards");
    let m = hazardline::run::part_folder::read_meta(&parts.join("part-0001-of-0002-from-2015-07-01-to-2015-09-30"))
        .unwrap();
    assert_eq!((m.dates_from.as_deref(), m.dates_to.as_deref()), (Some("2015-07-01"), Some("2015-09-30")));
    assert!(m.curves > 0);
    hazardline(&["merge", &pipeline, "--out", out.to_str().unwrap(), "--label", "r"]).success();
    assert_same(&one, &files(&out.join("demo/r"), &["run.log"]), "2 shards x date ranges");

    // A gap, and an overlap, in one shard's dates stop the merge (exit 2) and say where.
    let merge_err = || refused(&["merge", &pipeline, "--out", out.to_str().unwrap(), "--label", "r"]);
    std::fs::remove_dir_all(parts.join("part-0001-of-0002-from-2015-07-01-to-2015-09-30")).unwrap();
    let err = merge_err();
    assert!(err.contains("shard 1/2") && err.contains("no part covers 2015-07-01..2015-09-30"), "{err}");
    part(&pipeline, &out, "1/2", "2015-06-01..2015-09-30");
    let err = merge_err();
    assert!(err.contains("shard 1/2") && err.contains("overlaps"), "{err}");
}

#[test]
fn a_bad_date_range_is_refused() {
    for (arg, says) in
        [("2016-01-01..2015-01-01", "is after"), ("2016-13-01..", "not a date"), ("2016-01-01", "FROM..TO")]
    {
        let out = hazardline(&["run", "x.toml", "--dates", arg]).failure();
        let err = String::from_utf8(out.get_output().stderr.clone()).unwrap();
        assert!(err.contains(says), "{arg}: {err}");
    }
}

/// `report.large_tables = "by_year"`: the node and residual tables are folders of a file per
/// source (method) and year; their files, read in the order of their names, hold exactly the
/// rows of the one-file table; a merge of date-range parts writes the same files; the report
/// re-rendered from the folders equals the run's.
#[test]
fn large_tables_by_year_are_folders_that_merge_exactly() {
    let dir = tempfile::tempdir().unwrap();
    let pipeline = universe(&dir.path().join("data"));
    let one_file = single(&pipeline, &dir.path().join("one-file"));
    edit(&pipeline, "[report]", "[report]\nlarge_tables = \"by_year\"");
    let by_year = single(&pipeline, &dir.path().join("by-year"));
    let names: Vec<&str> = by_year
        .keys()
        .filter(|k| k.starts_with("tables/hazard_curves/") || k.starts_with("tables/calibration_residuals/"))
        .map(String::as_str)
        .collect();
    assert_eq!(
        names,
        [
            "tables/calibration_residuals/1-bootstrap-2015.parquet",
            "tables/calibration_residuals/1-bootstrap-2016.parquet",
            "tables/calibration_residuals/2-bond_fit-2015.parquet",
            "tables/calibration_residuals/2-bond_fit-2016.parquet",
            "tables/calibration_residuals/2-cir-2015.parquet",
            "tables/calibration_residuals/2-cir-2016.parquet",
            "tables/hazard_curves/1-cds-2015.parquet",
            "tables/hazard_curves/1-cds-2016.parquet",
            "tables/hazard_curves/2-bond-2015.parquet",
            "tables/hazard_curves/2-bond-2016.parquet",
        ]
    );
    let manifest = String::from_utf8(by_year["manifest.json"].clone()).unwrap();
    assert!(
        manifest.contains("\"tables/hazard_curves/2-bond-2016.parquet\"")
            && !manifest.contains("\"tables/hazard_curves.parquet\""),
        "{manifest}"
    );
    // The same rows in the same order as the one-file table.
    let (a, b) = (dir.path().join("one-file/demo/r/tables"), dir.path().join("by-year/demo/r/tables"));
    assert_eq!(
        hazardline::tables::read_from::<hazardline::tables::HazardCurveRow>(&a.join("hazard_curves.parquet")).unwrap(),
        hazardline::tables::read::<hazardline::tables::HazardCurveRow>(&b).unwrap()
    );
    assert_eq!(
        hazardline::tables::read_from::<hazardline::tables::ResidualRow>(&a.join("calibration_residuals.parquet"))
            .unwrap(),
        hazardline::tables::read::<hazardline::tables::ResidualRow>(&b).unwrap()
    );
    assert_eq!(
        hazardline::tables::read_from::<hazardline::tables::QuoteConversionRow>(
            &a.join("cds_quote_conversions.parquet")
        )
        .unwrap(),
        hazardline::tables::read::<hazardline::tables::QuoteConversionRow>(&b).unwrap()
    );
    // Every other file is the one-file run's, the report (both forms) but for the tables' names.
    for (k, v) in &one_file {
        if k != "report.md"
            && k != "report.html"
            && k != "manifest.json"
            && !k.starts_with("tables/hazard_curves")
            && !k.starts_with("tables/calibration_residuals")
            && !k.starts_with("tables/cds_quote_conversions")
        {
            assert!(by_year[k] == *v, "{k} differs");
        }
    }
    let report = String::from_utf8(by_year["report.md"].clone()).unwrap();
    assert!(report.contains("`tables/calibration_residuals/`"), "the report names the folder");
    // Parts by entity and date merge into the same files.
    let out = dir.path().join("parts");
    for (shard, dates) in [("1/2", "..2015-12-31"), ("1/2", "2016-01-01.."), ("2/2", "..")] {
        part(&pipeline, &out, shard, dates);
    }
    let merged = hazardline(&["merge", &pipeline, "--out", out.to_str().unwrap(), "--label", "r", "-v"]).success();
    // With two entity shards no year is whole in one part: every row is written again.
    let log = String::from_utf8(merged.get_output().stderr.clone()).unwrap();
    assert!(log.contains("copied the parts' whole years") && log.contains("years=0"), "{log}");
    assert_same(&by_year, &files(&out.join("demo/r"), &["run.log"]), "by-year tables from parts");
    // One shard in date ranges: a year inside one part's range is that part's files, copied;
    // a year cut by a boundary is written from both parts' rows. Both give the same bytes.
    for (cut, (first, second), whole) in
        [("year-end", ("..2015-12-31", "2016-01-01.."), 2), ("mid-year", ("..2015-06-30", "2015-07-01.."), 1)]
    {
        let out = dir.path().join(cut);
        for dates in [first, second] {
            part(&pipeline, &out, "1/1", dates);
        }
        let merged = hazardline(&["merge", &pipeline, "--out", out.to_str().unwrap(), "--label", "r", "-v"]).success();
        let log = String::from_utf8(merged.get_output().stderr.clone()).unwrap();
        assert!(log.contains(&format!("years={whole}")), "{cut}: {log}");
        assert_same(&by_year, &files(&out.join("demo/r"), &["run.log"]), cut);
    }
    // The report stage alone, reading the folders back, writes the same report.
    let run_dir = dir.path().join("by-year/demo/r");
    std::fs::remove_file(run_dir.join("report.md")).unwrap();
    hazardline(&["report", run_dir.to_str().unwrap()]).success();
    assert!(
        std::fs::read(run_dir.join("report.md")).unwrap() == by_year["report.md"],
        "the report re-rendered from the folders differs"
    );
}

#[test]
fn an_unknown_large_tables_value_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let pipeline = universe(&dir.path().join("data"));
    edit(&pipeline, "[report]", "[report]\nlarge_tables = \"by_month\"");
    let err = refused(&["run", &pipeline, "--out", dir.path().join("o").to_str().unwrap()]);
    // The parser refuses it, naming the line, the key and the accepted values.
    assert!(
        err.contains("large_tables")
            && err.contains("unknown variant `by_month`, expected one of `auto`, `single`, `by_year`"),
        "{err}"
    );
}

/// The worked example of DEVELOPERS.md ("Sharded runs"): `pipelines/run-sharded.sh` runs 2
/// shards x 2 date ranges through xargs, then the merge, into the single run's files.
#[test]
fn the_worked_example_script_runs_shards_and_date_ranges() {
    let dir = tempfile::tempdir().unwrap();
    let pipeline = universe(&dir.path().join("data"));
    let one = single(&pipeline, &dir.path().join("single"));
    let out = dir.path().join("script");
    let status = std::process::Command::new("sh")
        .arg(crate::support::repo().join("pipelines/run-sharded.sh"))
        .args([&pipeline, "2", "2", "--", "--out", out.to_str().unwrap(), "--label", "r", "-q"])
        .env("HAZARDLINE", assert_cmd::cargo::cargo_bin("hazardline"))
        .env("DATES", "..2015-11-30 2015-12-01..")
        .status()
        .unwrap();
    assert!(status.success());
    let parts: Vec<String> = std::fs::read_dir(out.join("demo/r.shards"))
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().to_string())
        .collect();
    assert_eq!(parts.len(), 4, "{parts:?}");
    assert_same(&one, &files(&out.join("demo/r"), &["run.log"]), "the script's run");
}

#[test]
fn merge_refuses_parts_that_were_tampered_with_or_made_from_other_inputs() {
    let dir = tempfile::tempdir().unwrap();
    let pipeline = universe(&dir.path().join("data"));
    let out = dir.path().join("o");
    let o = out.to_str().unwrap();
    for i in ["1/2", "2/2"] {
        hazardline(&["run", &pipeline, "--out", o, "--label", "r", "--shard", i]).success();
    }
    let parts = out.join("demo/r.shards");
    let (one, two) = (parts.join("part-0001-of-0002"), parts.join("part-0002-of-0002"));
    let merge = || refused(&["merge", &pipeline, "--out", o, "--label", "r"]);
    let keep = |p: &Path| std::fs::read(p).unwrap();

    // One part's node table copied over the other's: named, with what differs.
    let original = keep(&two.join("hazard_curves.parquet"));
    std::fs::copy(one.join("hazard_curves.parquet"), two.join("hazard_curves.parquet")).unwrap();
    let e = merge();
    assert!(
        e.contains("part-0002-of-0002") && e.contains("hazard_curves.parquet differs from what the part wrote"),
        "{e}"
    );
    std::fs::write(two.join("hazard_curves.parquet"), original).unwrap();

    // A file the part did not write.
    std::fs::write(two.join("extra.parquet"), b"PAR1").unwrap();
    assert!(merge().contains("extra.parquet is not a file the part wrote"));
    std::fs::remove_file(two.join("extra.parquet")).unwrap();

    // Impossible shard numbers (which used to switch the completeness check off).
    let json = two.join("partition.json");
    let meta = std::fs::read_to_string(&json).unwrap();
    for edited in [meta.replace("\"shards\": 2", "\"shards\": 0"), meta.replace("\"shard\": 2", "\"shard\": 3")] {
        assert_ne!(edited, meta);
        std::fs::write(&json, &edited).unwrap();
        let e = merge();
        assert!(e.contains("which cannot be") || e.contains("holds parts of"), "{e}");
    }
    std::fs::write(&json, &meta).unwrap();

    // A count edited in partition.json (before: printed as it was): checked against the
    // part's own node and residual tables as they are merged.
    let curves: usize = {
        let at = meta.find("\"curves\": ").unwrap() + "\"curves\": ".len();
        meta[at..].split(|c: char| !c.is_ascii_digit()).next().unwrap().parse().unwrap()
    };
    for (from, to, what) in [
        (format!("\"curves\": {curves},"), format!("\"curves\": {},", curves + 1), "curves, the node table holds"),
        ("\"curves_complete\": ".to_string(), "\"curves_complete\": 1".to_string(), "complete curves"),
        ("\"max_abs_residual_bp\": ".to_string(), "\"max_abs_residual_bp\": 1".to_string(), "largest |residual|"),
    ] {
        let edited = meta.replacen(&from, &to, 1);
        assert_ne!(edited, meta, "{from}");
        std::fs::write(&json, &edited).unwrap();
        let e = merge();
        assert!(e.contains("part-0002-of-0002") && e.contains("does not match the part's own tables"), "{e}");
        assert!(e.contains(what), "{e}");
    }
    std::fs::write(&json, &meta).unwrap();

    // Inputs changed after the shards ran: the changed file is named.
    let quotes = dir.path().join("data/entities.csv");
    let before = keep(&quotes);
    let mut changed = before.clone();
    changed.extend_from_slice(b"\n");
    std::fs::write(&quotes, changed).unwrap();
    let e = merge();
    assert!(e.contains("the inputs changed since this part ran") && e.contains("entities.csv"), "{e}");
    std::fs::write(&quotes, before).unwrap();

    // Untouched, the parts merge.
    hazardline(&["merge", &pipeline, "--out", o, "--label", "r"]).success();
}

/// The Dask driver (pipelines/dask-shards.py, Dask distributed from PyPI): 2 shards x 2 date
/// ranges as tasks on a LocalCluster on loopback, then the merge, give the single run's files
/// byte for byte. Skipped with a notice where Python has no `dask.distributed` (outside CI;
/// `.ci/run` installs it, and sets CI, under which a missing package fails the test).
#[test]
fn dask_parts_merge_into_the_single_runs_bytes() {
    let python = std::env::var("HAZARDLINE_PYTHON").unwrap_or_else(|_| "python3".into());
    let has_dask =
        std::process::Command::new(&python).args(["-c", "import dask.distributed"]).status().is_ok_and(|s| s.success());
    if !has_dask {
        assert!(std::env::var_os("CI").is_none(), "dask.distributed is missing under CI");
        eprintln!("skipped: {python} cannot import dask.distributed (pip install \"dask[distributed]\")");
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    let pipeline = universe(&dir.path().join("data"));
    let one = single(&pipeline, &dir.path().join("single"));
    let out = dir.path().join("dask");
    let bin = assert_cmd::cargo::cargo_bin("hazardline");
    let status = std::process::Command::new(&python)
        .arg(crate::support::repo().join("pipelines/dask-shards.py"))
        .args([&pipeline, "2", "--dates", "..2015-11-30", "2015-12-01..", "--workers", "2", "--hazardline"])
        .arg(&bin)
        .args(["--", "--out", out.to_str().unwrap(), "--label", "r", "-q"])
        .status()
        .unwrap();
    assert!(status.success());
    let parts = std::fs::read_dir(out.join("demo/r.shards")).unwrap().count();
    assert_eq!(parts, 4);
    assert_same(&one, &files(&out.join("demo/r"), &["run.log"]), "the Dask run");
    // A part that keeps failing stops the run after its retries, without a merge.
    let failed = dir.path().join("failed");
    let status = std::process::Command::new(&python)
        .arg(crate::support::repo().join("pipelines/dask-shards.py"))
        .args([&pipeline, "2", "--retries", "1", "--hazardline"])
        .arg(dir.path().join("no-such-binary"))
        .args(["--", "--out", failed.to_str().unwrap(), "--label", "r"])
        .stderr(std::process::Stdio::null())
        .status()
        .unwrap();
    assert!(!status.success());
    assert!(!failed.join("demo/r").exists());
}
