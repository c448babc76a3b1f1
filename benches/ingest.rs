//! Ingestion and data-quality checks of a large CDS panel: 2,000 entities x 10 years of
//! business days x 8 tenors (about 42 million rows) as Parquet, one file per year in
//! `year=YYYY/` folders. Prints wall time, CPU time, rows per second and peak resident memory
//! of `ingest::load` on it.
//!
//! Run: `cargo bench --bench ingest`. The panel is generated once (in a child process, so its
//! memory does not count) under target/bench-data/; `HAZARDLINE_BENCH_ENTITIES` and
//! `HAZARDLINE_BENCH_YEARS` change the size.

use chrono::NaiveDate;
use hazardline::ingest::{load, InputPaths, QualitySettings};
use hazardline::tables::parquet::{write_parquet, TableBuilder};
use hazardline::time::{add_days, Calendar};
use std::path::{Path, PathBuf};
use std::time::Instant;

mod support;
use support::{cpu_seconds, peak_rss_mib};

const TENORS: [(&str, f64); 8] =
    [("6M", 0.4), ("1Y", 0.5), ("2Y", 0.65), ("3Y", 0.8), ("4Y", 0.9), ("5Y", 1.0), ("7Y", 1.1), ("10Y", 1.2)];

fn env_usize(name: &str, default: usize) -> usize {
    std::env::var(name).ok().and_then(|v| v.parse().ok()).unwrap_or(default)
}

fn generate(dir: &Path, entities: usize, years: usize) {
    let cal = Calendar::weekends_only();
    let names: Vec<String> = (0..entities).map(|i| format!("N{i:05}")).collect();
    for y in 0..years {
        let year = 2015 + y as i32;
        let mut dates = Vec::new();
        let mut d = NaiveDate::from_ymd_opt(year, 1, 1).unwrap();
        while d.year_ce().1 as i32 == year {
            if cal.is_business_day(d) {
                dates.push(d);
            }
            d = add_days(d, 1);
        }
        let n = dates.len() * entities * TENORS.len();
        let (mut dd, mut ee, mut tt, mut ss) =
            (Vec::with_capacity(n), Vec::with_capacity(n), Vec::with_capacity(n), Vec::with_capacity(n));
        for (k, &day) in dates.iter().enumerate() {
            for (e, name) in names.iter().enumerate() {
                let level = 40.0 + (e % 97) as f64 * 6.0;
                let wiggle = 1.0 + 0.05 * (((k + e) % 17) as f64 / 17.0 - 0.5);
                for (t, m) in TENORS {
                    dd.push(Some(day));
                    ee.push(Some(name.as_str()));
                    tt.push(Some(t));
                    ss.push(Some((level * m * wiggle * 100.0).round() / 100.0));
                }
            }
        }
        let mut df = TableBuilder::new()
            .dates("date", dd)
            .strings("entity", ee)
            .strings("currency", vec![Some("USD"); n])
            .strings("tenor", tt)
            .floats("par_spread_bp", ss)
            .finish()
            .unwrap();
        write_parquet(&mut df, &dir.join(format!("year={year}/part-0.parquet")), &[]).unwrap();
        eprintln!("generated {year}: {n} rows");
    }
}

trait YearCe {
    fn year_ce(&self) -> (bool, u32);
}
impl YearCe for NaiveDate {
    fn year_ce(&self) -> (bool, u32) {
        chrono::Datelike::year_ce(self)
    }
}

fn main() {
    let entities = env_usize("HAZARDLINE_BENCH_ENTITIES", 2000);
    let years = env_usize("HAZARDLINE_BENCH_YEARS", 10);
    if let Ok(dir) = std::env::var("HAZARDLINE_BENCH_GENERATE") {
        generate(Path::new(&dir), entities, years);
        return;
    }
    let root = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join(format!("target/bench-data/cds-{entities}x{years}"));
    if !root.join(".complete").exists() {
        let _ = std::fs::remove_dir_all(&root);
        std::fs::create_dir_all(&root).unwrap();
        let status = std::process::Command::new(std::env::current_exe().unwrap())
            .env("HAZARDLINE_BENCH_GENERATE", &root)
            .status()
            .unwrap();
        assert!(status.success());
        std::fs::write(root.join(".complete"), b"").unwrap();
    }
    let paths = InputPaths { cds_quotes: Some(root.clone()), ..Default::default() };
    let started = Instant::now();
    let cpu0 = cpu_seconds();
    let ds = load(&paths, &Calendar::weekends_only(), &QualitySettings::default()).unwrap();
    let wall = started.elapsed().as_secs_f64();
    let cpu = cpu_seconds() - cpu0;
    let c = &ds.counts[0];
    println!("panel: {} ({entities} entities x {years} years x 8 tenors)", root.display());
    println!(
        "rows in {} = used {} + rejected {}; flagged {}; quality flags {}",
        c.rows_in,
        c.used,
        c.rejected,
        c.flagged,
        ds.flags.len()
    );
    println!("wall {wall:.2} s, cpu {cpu:.2} s, {:.2} million rows per second", c.rows_in as f64 / wall / 1e6);
    println!("peak resident memory {:.0} MiB", peak_rss_mib());
}
