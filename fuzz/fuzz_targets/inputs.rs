//! Every input reader on arbitrary bytes. The first byte picks the table (one of the eight
//! input tables) and the file type (CSV or Parquet); the rest is the file. Loading it must
//! either work, with rows in = rows used + rows rejected for every table, or stop with an
//! error that names the file. A panic the readers catch (the table reader's, on a damaged
//! file) is part of that contract and not a finding; a panic that escapes, an abort or a hang
//! is.

#![no_main]

use hazardline::ingest::{load, InputPaths, QualitySettings};
use hazardline::time::Calendar;
use libfuzzer_sys::fuzz_target;

const TABLES: [&str; 8] =
    ["cds_quotes", "discount", "bonds", "bond_quotes", "entities", "grades", "defaults", "cohort_history"];

fuzz_target!(|data: &[u8]| {
    static QUIET: std::sync::Once = std::sync::Once::new();
    // libfuzzer-sys aborts on any panic, caught or not; the readers catch the table reader's
    // panics on purpose, so the hook is silenced and an escaping panic is left to the
    // harness's own catch (which aborts, and so is reported).
    QUIET.call_once(|| std::panic::set_hook(Box::new(|_| {})));
    let Some((&pick, body)) = data.split_first() else { return };
    let table = TABLES[usize::from(pick & 7)];
    let ext = if pick & 8 == 0 { "csv" } else { "parquet" };
    let dir = std::env::temp_dir().join(format!("hazardline-fuzz-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let file = dir.join(format!("{table}.{ext}"));
    std::fs::write(&file, body).unwrap();
    let mut paths = InputPaths::default();
    let slot = match table {
        "cds_quotes" => &mut paths.cds_quotes,
        "discount" => &mut paths.discount,
        "bonds" => &mut paths.bonds,
        "bond_quotes" => &mut paths.bond_quotes,
        "entities" => &mut paths.entities,
        "grades" => &mut paths.grades,
        "defaults" => &mut paths.defaults,
        _ => &mut paths.cohort_history,
    };
    *slot = Some(file.clone());
    match load(&paths, &Calendar::weekends_only(), &QualitySettings::default()) {
        Ok(ds) => {
            for c in &ds.counts {
                assert_eq!(c.rows_in, c.used + c.rejected, "accounting of {}", c.table);
            }
        }
        Err(e) => assert!(e.to_string().contains(&format!("{table}.{ext}")), "{e}"),
    }
    let _ = std::fs::remove_file(&file);
});
