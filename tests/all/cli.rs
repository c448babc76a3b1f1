//! The `calibrate` command end to end: outputs, row accounting, and exit code 2 with a
//! message naming the file and column for bad input.

use assert_cmd::Command;
use polars::prelude::*;
use std::path::Path;

/// (rows in, used, rejected) of `table` from the printed accounting.
fn counts(stdout: &str, table: &str) -> (u64, u64, u64) {
    let line = stdout
        .lines()
        .find(|l| l.split_whitespace().next() == Some(table))
        .unwrap_or_else(|| panic!("no {table} line in {stdout}"));
    let v: Vec<u64> = line.split_whitespace().skip(1).map(|x| x.parse().unwrap()).collect();
    (v[0], v[1], v[2])
}

fn write(dir: &Path, name: &str, text: &str) -> std::path::PathBuf {
    let p = dir.join(name);
    std::fs::write(&p, text).unwrap();
    p
}

const DISCOUNT: &str = "date,currency,tenor,zero_rate\n\
2024-03-21,USD,6M,0.032\n2024-03-21,USD,1Y,0.033\n2024-03-21,USD,5Y,0.036\n2024-03-21,USD,10Y,0.038\n\
2024-03-22,USD,6M,0.032\n2024-03-22,USD,1Y,0.033\n2024-03-22,USD,5Y,0.036\n2024-03-22,USD,10Y,0.038\n";

fn quotes() -> String {
    let mut s = String::from("date,entity,currency,tenor,par_spread_bp,recovery,upfront,coupon_bp,vendor_note\n");
    for date in ["2024-03-21", "2024-03-22"] {
        for (t, bp) in [("1Y", 60.0), ("3Y", 85.0), ("5Y", 110.0), ("10Y", 140.0)] {
            s += &format!("{date},ALPHA,USD,{t},{bp},,,,x\n");
        }
        for (t, up) in [("1Y", 0.05), ("5Y", 0.20)] {
            s += &format!("{date},BRAVO,USD,{t},,0.25,{up},500,\n");
        }
    }
    // Bad rows, one per reason.
    s += "2024-03-21,ALPHA,USD,2Y,-5,,,,\n"; // negative spread
    s += "2024-03-21,ALPHA,USD,5X,100,,,,\n"; // unknown tenor
    s += "2024-03-23,ALPHA,USD,5Y,100,,,,\n"; // Saturday
    s += "2024-03-21,ALPHA,USD,7Y,abc,,,,\n"; // not a number
    s += "2024-03-21,CHARLIE,EUR,5Y,100,,,,\n"; // no EUR curve
    s
}

#[test]
fn calibrate_writes_tables_and_accounts_for_every_row() {
    let dir = tempfile::tempdir().unwrap();
    let cds = write(dir.path(), "cds.csv", &quotes());
    let disc = write(dir.path(), "disc.csv", DISCOUNT);
    let out = dir.path().join("out");
    let assert = Command::cargo_bin("hazardline")
        .unwrap()
        .args(["calibrate", "--cds"])
        .arg(&cds)
        .arg("--discount")
        .arg(&disc)
        .arg("--out")
        .arg(&out)
        .assert()
        .success();
    let stdout = String::from_utf8(assert.get_output().stdout.clone()).unwrap();
    assert_eq!(counts(&stdout, "cds_quotes"), (17, 12, 5), "{stdout}");
    assert_eq!(counts(&stdout, "discount"), (8, 8, 0), "{stdout}");

    let read = |name: &str| {
        let p = out.join(name);
        ParquetReader::new(std::fs::File::open(&p).unwrap()).finish().unwrap()
    };
    let hz = read("hazard_curves.parquet");
    assert_eq!(hz.height(), 12);
    for col in ["date", "entity", "currency", "source", "tenor", "maturity", "hazard", "survival", "status"] {
        assert!(hz.column(col).is_ok(), "hazard_curves lacks {col}");
    }
    assert_eq!(hz.column("date").unwrap().dtype(), &DataType::Date);
    assert_eq!(hz.column("maturity").unwrap().dtype(), &DataType::Date);
    let res = read("calibration_residuals.parquet");
    assert_eq!(res.height(), 12);
    let r = res.column("residual_bp").unwrap().f64().unwrap();
    assert!(r.iter().all(|v| v.unwrap().abs() < 1e-6));
    let rej = read("rejects.parquet");
    assert_eq!(rej.height(), 5);
    let reasons: Vec<String> =
        rej.column("reason").unwrap().str().unwrap().iter().map(|s| s.unwrap().to_string()).collect();
    for want in ["non_positive_spread", "unknown_tenor", "non_business_day", "unparseable_number", "no_discount_curve"]
    {
        assert!(reasons.iter().any(|r| r == want), "missing reject {want}: {reasons:?}");
    }
    let rows: Vec<i64> = rej.column("row").unwrap().i64().unwrap().iter().map(|v| v.unwrap()).collect();
    assert_eq!(rows, vec![13, 14, 15, 16, 17]);
}

#[test]
fn missing_file_exits_2_naming_it() {
    let dir = tempfile::tempdir().unwrap();
    let disc = write(dir.path(), "disc.csv", DISCOUNT);
    Command::cargo_bin("hazardline")
        .unwrap()
        .args(["calibrate", "--cds", "no/such/quotes.csv", "--discount"])
        .arg(&disc)
        .arg("--out")
        .arg(dir.path().join("o"))
        .assert()
        .code(2)
        .stderr(predicates::str::contains("no/such/quotes.csv"))
        .stderr(predicates::str::contains("not found"));
}

#[test]
fn missing_column_exits_2_naming_file_and_column() {
    let dir = tempfile::tempdir().unwrap();
    let disc = write(dir.path(), "disc.csv", DISCOUNT);
    let cds = write(dir.path(), "bad.csv", "date,entity,currency,par_spread_bp\n2024-03-21,A,USD,100\n");
    Command::cargo_bin("hazardline")
        .unwrap()
        .args(["calibrate", "--cds"])
        .arg(&cds)
        .arg("--discount")
        .arg(&disc)
        .arg("--out")
        .arg(dir.path().join("o"))
        .assert()
        .code(2)
        .stderr(predicates::str::contains("bad.csv"))
        .stderr(predicates::str::contains("`tenor`"));
}

#[test]
fn parquet_folder_input_is_read() {
    // Write the quotes as Parquet in a folder of two files and calibrate from the folder.
    let dir = tempfile::tempdir().unwrap();
    let disc = write(dir.path(), "disc.csv", DISCOUNT);
    let qdir = dir.path().join("quotes");
    std::fs::create_dir(&qdir).unwrap();
    for (i, date) in ["2024-03-21", "2024-03-22"].iter().enumerate() {
        let d = hazardline::time::parse_iso_date(date).unwrap();
        let mut df = hazardline::tables::parquet::TableBuilder::new()
            .dates("date", vec![Some(d); 3])
            .strings("entity", vec![Some("ALPHA"); 3])
            .strings("currency", vec![Some("USD"); 3])
            .strings("tenor", vec![Some("1Y"), Some("5Y"), Some("10Y")])
            .floats("par_spread_bp", vec![Some(50.0), Some(90.0), Some(120.0)])
            .finish()
            .unwrap();
        hazardline::tables::parquet::write_parquet(&mut df, &qdir.join(format!("part-{i}.parquet")), &[]).unwrap();
    }
    let out = dir.path().join("out");
    let assert = Command::cargo_bin("hazardline")
        .unwrap()
        .args(["calibrate", "--cds"])
        .arg(&qdir)
        .arg("--discount")
        .arg(&disc)
        .arg("--out")
        .arg(&out)
        .assert()
        .success();
    let stdout = String::from_utf8(assert.get_output().stdout.clone()).unwrap();
    assert_eq!(counts(&stdout, "cds_quotes"), (6, 6, 0), "{stdout}");
}

#[test]
fn wrong_column_type_exits_2_naming_file_column_found_and_expected() {
    let dir = tempfile::tempdir().unwrap();
    let disc = write(dir.path(), "disc.csv", DISCOUNT);
    let d = hazardline::time::parse_iso_date("2024-03-21").unwrap();
    let mut df = hazardline::tables::parquet::TableBuilder::new()
        .dates("date", vec![Some(d)])
        .strings("entity", vec![Some("ALPHA")])
        .strings("currency", vec![Some("USD")])
        .strings("tenor", vec![Some("5Y")])
        .dates("par_spread_bp", vec![Some(d)])
        .finish()
        .unwrap();
    let q = dir.path().join("typed.parquet");
    hazardline::tables::parquet::write_parquet(&mut df, &q, &[]).unwrap();
    Command::cargo_bin("hazardline")
        .unwrap()
        .args(["check", "--cds"])
        .arg(&q)
        .arg("--discount")
        .arg(&disc)
        .assert()
        .code(2)
        .stderr(predicates::str::contains("typed.parquet"))
        .stderr(predicates::str::contains("`par_spread_bp`"))
        .stderr(predicates::str::contains("type date"))
        .stderr(predicates::str::contains("expected a number"));
}

#[test]
fn a_repeated_header_column_and_a_broken_file_are_named_briefly() {
    let dir = tempfile::tempdir().unwrap();
    let disc = write(dir.path(), "disc.csv", DISCOUNT);
    let check = |cds: &Path| {
        let a = Command::cargo_bin("hazardline")
            .unwrap()
            .args(["check", "--discount"])
            .arg(&disc)
            .arg("--cds")
            .arg(cds)
            .assert()
            .code(2);
        String::from_utf8(a.get_output().stderr.clone()).unwrap()
    };
    // The same column twice: refused, not read from one of the copies.
    let twice = write(
        dir.path(),
        "twice.csv",
        "date,entity,currency,tenor,par_spread_bp,par_spread_bp\n2024-03-21,ALPHA,USD,5Y,100,200\n",
    );
    let e = check(&twice);
    assert!(
        e.contains("twice.csv") && e.contains("column `par_spread_bp` appears more than once in the header"),
        "{e}"
    );
    // An unterminated quote in a large file: the message names the file and stays short.
    let mut big = String::from("date,entity,currency,tenor,par_spread_bp\n2024-03-21,\"ALPHA,USD,5Y,100\n");
    for i in 0..20_000 {
        big += &format!("2024-03-21,NAME{i},USD,5Y,100\n");
    }
    let broken = write(dir.path(), "broken.csv", &big);
    let e = check(&broken);
    assert!(e.contains("broken.csv") && e.len() < 1_000, "{} bytes: {}", e.len(), &e[..e.len().min(400)]);
    assert!(e.contains("line 2, field 2 (`entity`): a quote opens here and is never closed"), "{e}");
    // A ragged row: the line and the fields, not the reader's option names.
    let ragged = write(
        dir.path(),
        "ragged.csv",
        "date,entity,currency,tenor,par_spread_bp\n2024-03-21,ALPHA,USD,5Y,100\n2024-03-21,BRAVO,USD,5Y,100,7\n",
    );
    let e = check(&ragged);
    assert!(e.contains("ragged.csv") && e.contains("line 3: 6 fields where the header has 5"), "{e}");
    assert!(!e.contains("Schema") && !e.contains("truncate_ragged_lines"), "{e}");
}

#[test]
fn parquet_nan_infinity_and_out_of_range_dates_get_the_csv_reasons() {
    let dir = tempfile::tempdir().unwrap();
    let disc = write(dir.path(), "disc.csv", DISCOUNT);
    let d = hazardline::time::parse_iso_date("2024-03-21").unwrap();
    let mut df = hazardline::tables::parquet::TableBuilder::new()
        .dates("date", vec![Some(d); 4])
        .strings("entity", vec![Some("ALPHA"); 4])
        .strings("currency", vec![Some("USD"); 4])
        .strings("tenor", vec![Some("1Y"), Some("3Y"), Some("5Y"), Some("10Y")])
        .floats("par_spread_bp", vec![Some(50.0), Some(f64::NAN), Some(f64::INFINITY), Some(120.0)])
        .floats("recovery", vec![Some(f64::NAN), None, None, None])
        .finish()
        .unwrap();
    // The last row's date: the largest day number a Parquet date can hold, no calendar date.
    let extreme = Series::new("date".into(), &[19_803i32, 19_803, 19_803, i32::MAX]).cast(&DataType::Date).unwrap();
    df.replace("date", extreme.into()).unwrap();
    let q = dir.path().join("q.parquet");
    hazardline::tables::parquet::write_parquet(&mut df, &q, &[]).unwrap();
    let a = Command::cargo_bin("hazardline")
        .unwrap()
        .args(["check", "--discount"])
        .arg(&disc)
        .arg("--cds")
        .arg(&q)
        .assert()
        .success();
    let out = String::from_utf8(a.get_output().stdout.clone()).unwrap();
    // Every row is rejected, none read as empty or as the default recovery.
    assert_eq!(counts(&out, "cds_quotes"), (4, 0, 4), "{out}");
    let reason = |r: &str| out.lines().any(|l| l.contains("cds_quotes") && l.contains(r));
    assert!(reason("unparseable_number") && reason("unparseable_date"), "{out}");
}

/// `--log-format json`: every line on stderr is one JSON object; a run logs each stage's
/// timing and memory (target `hazardline::stage`) and each table's row accounting (target
/// `hazardline::counts`, rows in = used + rejected) even at the default level; an error is a
/// JSON line too, with its exit code (2).
#[test]
fn json_log_lines_carry_stages_and_counts() {
    let dir = tempfile::tempdir().unwrap();
    let cds = write(dir.path(), "cds.csv", &quotes());
    let disc = write(dir.path(), "disc.csv", DISCOUNT);
    let p = write(
        dir.path(),
        "p.toml",
        &format!(
            "name = \"j\"\n[inputs]\ncds_quotes = {:?}\ndiscount = {:?}\n[report]\nlabel = \"r\"\n",
            cds.display().to_string(),
            disc.display().to_string()
        ),
    );
    let a = Command::cargo_bin("hazardline")
        .unwrap()
        .args(["--log-format", "json", "run"])
        .arg(&p)
        .arg("--out")
        .arg(dir.path().join("out"))
        .assert()
        .success();
    let stderr = String::from_utf8(a.get_output().stderr.clone()).unwrap();
    let lines: Vec<serde_json::Value> =
        stderr.lines().map(|l| serde_json::from_str(l).unwrap_or_else(|e| panic!("{e}: {l}"))).collect();
    let of = |target: &str| lines.iter().filter(|v| v["target"] == target).collect::<Vec<_>>();
    let stages: Vec<&str> = of("hazardline::stage").iter().map(|v| v["stage"].as_str().unwrap()).collect();
    assert!(stages.contains(&"ingest") && stages.contains(&"report"), "{stages:?}");
    assert!(of("hazardline::stage")
        .iter()
        .all(|v| v["seconds"].as_f64().unwrap() >= 0.0 && v["peak_rss_mib"].as_f64().unwrap() > 0.0));
    let cds_counts =
        of("hazardline::counts").into_iter().find(|v| v["stage"] == "calibrate" && v["table"] == "cds_quotes").unwrap();
    let n = |k: &str| cds_counts[k].as_u64().unwrap();
    assert_eq!(n("rows_in"), n("used") + n("rejected"));
    assert_eq!((n("rows_in"), n("rejected")), (17, 5));

    let a = Command::cargo_bin("hazardline")
        .unwrap()
        .args(["--log-format", "json", "run"])
        .arg(dir.path().join("missing.toml"))
        .assert()
        .code(2);
    let stderr = String::from_utf8(a.get_output().stderr.clone()).unwrap();
    let v: serde_json::Value = serde_json::from_str(stderr.trim()).unwrap();
    assert_eq!((v["level"].as_str(), v["exit_code"].as_u64()), (Some("ERROR"), Some(2)));
    assert!(v["message"].as_str().unwrap().contains("missing.toml"));
}
