//! The whole pipeline end to end on a universe written by the demo generator: generates
//! (once, in a child process, under target/bench-data/) `hazardline demo` output of
//! HAZARDLINE_BENCH_ENTITIES x HAZARDLINE_BENCH_YEARS (default 2,000 x 10, about 41 million
//! quote rows), then times `run` on it in this process and prints each stage's wall time, the
//! total CPU time, rows per second and the peak resident memory.
//!
//! Run: `cargo bench --bench pipeline`; smaller sizes for the growth curve, e.g.
//! `HAZARDLINE_BENCH_ENTITIES=250 HAZARDLINE_BENCH_YEARS=5 cargo bench --bench pipeline`.
//! The CIR fit is limited to the generated pipeline's charted names (as in the demo); set
//! HAZARDLINE_BENCH_CIR=0 to switch it off; HAZARDLINE_BENCH_LEAN=1 switches off the quote
//! conversions and the sensitivity shifts (=0 switches them on again).

use hazardline::config::load_pipeline;
use hazardline::run::{run, RunOptions};
use hazardline::sim::ScenarioSpec;
use hazardline::stages::universe::write_demo;
use std::path::PathBuf;
use std::time::Instant;

mod support;
use support::{cpu_seconds, peak_rss_mib};

fn env_usize(name: &str, default: usize) -> usize {
    std::env::var(name).ok().and_then(|v| v.parse().ok()).unwrap_or(default)
}

fn main() {
    if std::env::args().any(|a| a == "--list") {
        return;
    }
    let entities = env_usize("HAZARDLINE_BENCH_ENTITIES", 2000);
    let years = env_usize("HAZARDLINE_BENCH_YEARS", 10) as u32;
    let dir = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join(format!("target/bench-data/pipeline-{entities}x{years}"));
    if std::env::var_os("HAZARDLINE_BENCH_CHILD").is_some() {
        let t = Instant::now();
        write_demo(&dir, &ScenarioSpec { entities, years, ..ScenarioSpec::demo(20150101) })
            .expect("generate the universe");
        eprintln!("generated {entities} x {years} in {:.1} s", t.elapsed().as_secs_f64());
        return;
    }
    if !dir.join("pipeline.toml").exists() {
        let exe = std::env::current_exe().expect("bench executable");
        let status =
            std::process::Command::new(exe).env("HAZARDLINE_BENCH_CHILD", "1").status().expect("generator child");
        assert!(status.success(), "generating the universe failed");
    }
    let p = dir.join("pipeline.toml");
    if std::env::var("HAZARDLINE_BENCH_CIR").as_deref() == Ok("0") {
        let text = std::fs::read_to_string(&p).unwrap().replace("cir = true", "cir = false");
        std::fs::write(&p, text).unwrap();
    }
    // HAZARDLINE_BENCH_LEAN=1: without the quote conversions and the sensitivity shifts (the
    // bootstrap, repricing and everything after them as before); =0 puts them back.
    if let Ok(lean) = std::env::var("HAZARDLINE_BENCH_LEAN") {
        let text = std::fs::read_to_string(&p).unwrap();
        let marker = "[calibration]\n";
        let lean_keys = "quote_conversions = false\nsensitivity_dates = \"off\"\n";
        let text = text.replace(&format!("{marker}{lean_keys}"), marker);
        let text = if lean == "1" { text.replace(marker, &format!("{marker}{lean_keys}")) } else { text };
        std::fs::write(&p, text).unwrap();
    }
    let cfg = load_pipeline(&p).expect("pipeline file");
    let (cpu0, t0) = (cpu_seconds(), Instant::now());
    let summary =
        run(&cfg, &RunOptions { out_root: Some(dir.join("reports")), label: Some("bench".into()) }).expect("run");
    let wall = t0.elapsed().as_secs_f64();
    let cpu = cpu_seconds() - cpu0;
    let rows: usize = summary.counts.iter().map(|c| c.rows_in).sum();
    println!("pipeline on {entities} entities x {years} years: {rows} input rows, {} curves", summary.curves);
    for ((stage, s), (_, rss, peak)) in summary.timings.iter().zip(&summary.memory) {
        println!("  {stage:<20} {s:>9.2} s   resident {rss:>7.0} MiB, peak so far {peak:>7.0} MiB");
    }
    println!(
        "  {:<20} {wall:>9.2} s wall, {cpu:.1} s CPU, {:.0} input rows/s, peak RSS {:.0} MiB",
        "total",
        rows as f64 / wall,
        peak_rss_mib()
    );
}
