//! The hazardline command line. Parses flags, builds checked settings, calls the library,
//! prints a summary, sets the exit code. Nothing else lives here.

use clap::{Parser, Subcommand, ValueEnum};
use hazardline::calibrate::{BootstrapSettings, InfeasiblePolicy};
use hazardline::commands::calibrate::{self, CalibrateSettings, CalibrationParams};
use hazardline::commands::check::{self, CheckSettings};
use hazardline::ingest::{InputPaths, QualitySettings, TableCounts};
use hazardline::instruments::AccrualIntegration;
use hazardline::time::Calendar;
use std::io::IsTerminal;
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(Parser)]
#[command(name = "hazardline", version, about = "Validation pipeline for reduced-form credit models")]
struct Cli {
    /// More log output (repeat for more).
    #[arg(short, long, action = clap::ArgAction::Count, global = true)]
    verbose: u8,
    /// Only errors.
    #[arg(short, long, global = true)]
    quiet: bool,
    #[command(subcommand)]
    command: Command,
}

#[derive(Clone, Copy, ValueEnum)]
enum Infeasible {
    /// Floor the segment's hazard at zero and show the residual.
    Floor,
    /// Fail the whole curve.
    Fail,
}

#[derive(Clone, Copy, ValueEnum)]
enum CheckSize {
    Small,
    Large,
}

#[derive(Clone, Copy, ValueEnum)]
enum Accrual {
    /// One interval per coupon period (the standard model).
    Standard,
    /// Split at every curve node inside a coupon period.
    Exact,
}

/// Input tables; each may be a CSV or Parquet file, or a folder of them.
#[derive(clap::Args, Clone)]
struct Inputs {
    /// cds_quotes table.
    #[arg(long)]
    cds: Option<PathBuf>,
    /// discount table (zero rates).
    #[arg(long)]
    discount: Option<PathBuf>,
    /// bonds table (static data).
    #[arg(long)]
    bonds: Option<PathBuf>,
    /// bond_quotes table (clean prices).
    #[arg(long = "bond-quotes")]
    bond_quotes: Option<PathBuf>,
    /// entities table.
    #[arg(long)]
    entities: Option<PathBuf>,
    /// grades table.
    #[arg(long)]
    grades: Option<PathBuf>,
    /// defaults table (quotes after an entity's default are rejected).
    #[arg(long)]
    defaults: Option<PathBuf>,
    /// cohort_history table.
    #[arg(long = "cohort-history")]
    cohort_history: Option<PathBuf>,
    /// A holiday list (one ISO date per line) added to the weekends.
    #[arg(long)]
    holidays: Option<PathBuf>,
}

impl Inputs {
    fn paths(&self) -> InputPaths {
        InputPaths {
            cds_quotes: self.cds.clone(),
            discount: self.discount.clone(),
            bonds: self.bonds.clone(),
            bond_quotes: self.bond_quotes.clone(),
            entities: self.entities.clone(),
            grades: self.grades.clone(),
            defaults: self.defaults.clone(),
            cohort_history: self.cohort_history.clone(),
        }
    }
}

#[derive(Subcommand)]
enum Command {
    /// Bootstrap hazard curves from CDS quotes and write hazard_curves, calibration_residuals,
    /// rejects, data_quality and quality_flags as Parquet into --out.
    Calibrate {
        #[command(flatten)]
        inputs: Inputs,
        /// Recovery rate for quotes without one (fraction).
        #[arg(long, default_value_t = 0.40)]
        recovery: f64,
        /// What to do with a quote that would need a negative hazard.
        #[arg(long, value_enum, default_value_t = Infeasible::Floor)]
        infeasible: Infeasible,
        /// Accrual-on-default integration.
        #[arg(long, value_enum, default_value_t = Accrual::Standard)]
        accrual: Accrual,
        /// Output folder.
        #[arg(long)]
        out: PathBuf,
    },
    /// Run the whole pipeline of a pipeline file into <output root>/<name>/<label>/.
    Run {
        /// The pipeline file (TOML).
        pipeline: PathBuf,
        /// Output root (instead of the pipeline file's report.output_root).
        #[arg(long)]
        out: Option<PathBuf>,
        /// Run label (instead of the pipeline file's report.label).
        #[arg(long)]
        label: Option<String>,
        /// Run only the per-entity stages for shard I of N (entities split by a fixed hash of
        /// their name) and write its part beside the run folder, in `<label>.shards/`; `merge`
        /// finishes the run once every shard has run.
        #[arg(long, value_name = "I/N", value_parser = parse_shard)]
        shard: Option<hazardline::partition::Shard>,
        /// Run only the per-entity stages for the curve dates FROM..TO (both included, either
        /// end may be left open, e.g. `..2016-12-31`, `2017-01-01..`) and write their part
        /// beside the run folder, as --shard does (with or without --shard); `merge` finishes
        /// the run once parts cover every date of every shard.
        #[arg(long, value_name = "FROM..TO", value_parser = parse_dates)]
        dates: Option<hazardline::partition::DateRange>,
    },
    /// Finish a sharded run: read the parts of every shard (`run --shard I/N`, I = 1..N, and
    /// `--dates FROM..TO` ranges that cover every date) and write the run folder, the same
    /// files a single run writes.
    Merge {
        /// The pipeline file (TOML) the shards ran.
        pipeline: PathBuf,
        /// Output root the shards wrote under (instead of the pipeline file's report.output_root).
        #[arg(long)]
        out: Option<PathBuf>,
        /// Run label the shards used (instead of the pipeline file's report.label).
        #[arg(long)]
        label: Option<String>,
    },
    /// Re-render report.md and its figures from an earlier run's tables.
    Report {
        /// The run folder (holding manifest.json and tables/).
        run_dir: PathBuf,
    },
    /// Write a Markdown comparison of two runs.
    Compare {
        run_a: PathBuf,
        run_b: PathBuf,
        /// Write to this file instead of standard output.
        #[arg(long)]
        out: Option<PathBuf>,
    },
    /// Write an invented universe (every input table, the planted truth under truth/, and a
    /// pipeline.toml that runs the whole pipeline on it) into OUT_DIR.
    Demo {
        out_dir: PathBuf,
        /// Seed of the generator: the same seed gives the same bytes.
        #[arg(long, default_value_t = 20150101)]
        seed: u64,
        /// Number of entities.
        #[arg(long, default_value_t = 250)]
        entities: usize,
        /// Years of daily quotes.
        #[arg(long, default_value_t = 5)]
        years: u32,
        /// First day of the quoted period (yyyy-mm-dd).
        #[arg(long, default_value = "2015-01-01", value_parser = hazardline::commands::demo::parse_start)]
        start: chrono::NaiveDate,
    },
    /// Generate a planted-truth universe in a temporary folder, run the whole pipeline on it,
    /// and print planted against recovered; exits 1 when the recovery fails its criteria.
    Selfcheck {
        /// small (120 entities x 3 years, seconds) or large (600 x 6 years, minutes).
        #[arg(long, value_enum, default_value_t = CheckSize::Small)]
        size: CheckSize,
        #[arg(long, default_value_t = 7)]
        seed: u64,
        /// Keep the universe and the run in this folder instead of a temporary one.
        #[arg(long)]
        keep: Option<PathBuf>,
    },
    /// Read the inputs and run the data-quality rules only: print the row accounting per table
    /// and the top reject reasons; with --out, write rejects, data_quality and quality_flags.
    Check {
        #[command(flatten)]
        inputs: Inputs,
        /// Output folder (optional).
        #[arg(long)]
        out: Option<PathBuf>,
    },
}

fn init_logging(verbose: u8, quiet: bool) {
    let level = if quiet {
        "error"
    } else {
        match verbose {
            0 => "warn",
            1 => "info",
            2 => "debug",
            _ => "trace",
        }
    };
    let filter = tracing_subscriber::EnvFilter::try_from_default_env().unwrap_or_else(|_| tracing_subscriber::EnvFilter::new(level));
    let _ = tracing_subscriber::fmt()
        .with_env_filter(filter)
        .with_writer(std::io::stderr)
        .with_ansi(std::io::stderr().is_terminal())
        .try_init();
}

fn calendar_of(inputs: &Inputs) -> Result<Calendar, ExitCode> {
    match &inputs.holidays {
        Some(p) => hazardline::config::read_holidays(p).map_err(|e| {
            eprintln!("error: {e}");
            ExitCode::from(2)
        }),
        None => Ok(Calendar::weekends_only()),
    }
}

fn print_counts(counts: &[TableCounts]) {
    println!("{:<16} {:>12} {:>12} {:>12} {:>12}", "table", "rows in", "used", "rejected", "flagged");
    for c in counts {
        println!("{:<16} {:>12} {:>12} {:>12} {:>12}", c.table, c.rows_in, c.used, c.rejected, c.flagged);
    }
}

fn print_reasons(reasons: &[(String, &'static str, usize)]) {
    if !reasons.is_empty() {
        println!("top reject reasons:");
        for (table, reason, n) in reasons {
            println!("  {table:<16} {reason:<24} {n:>10}");
        }
    }
}

/// Prints what a whole run (or a merge) did and picks the exit code.
fn finish_run(cfg: &hazardline::config::RunConfig, result: hazardline::error::Result<hazardline::pipeline::RunSummary>) -> anyhow::Result<ExitCode> {
    match result {
        Ok(s) => {
            print_counts(&s.counts);
            println!("curves: {} ({} with every node ok); largest |residual| on ok nodes {:.3e} bp", s.curves, s.curves_complete, s.max_abs_residual_bp);
            println!("rejected rows: {}; flags: {} ({} red)", s.rejected, s.flags, s.red_flags);
            for (stage, secs) in &s.timings {
                tracing::info!(stage = stage.as_str(), seconds = secs, "stage finished");
            }
            println!("report: {}", s.run_dir.join("report.md").display());
            if cfg.fail_on_red_flags && s.red_flags > 0 {
                return Ok(ExitCode::from(1));
            }
            Ok(ExitCode::SUCCESS)
        }
        Err(e) => {
            eprintln!("error: {e}");
            Ok(ExitCode::from(e.exit_code() as u8))
        }
    }
}

fn parse_shard(s: &str) -> Result<hazardline::partition::Shard, String> {
    hazardline::partition::Shard::parse(s)
}

fn parse_dates(s: &str) -> Result<hazardline::partition::DateRange, String> {
    hazardline::partition::DateRange::parse(s)
}

fn run(cli: Cli) -> anyhow::Result<ExitCode> {
    match cli.command {
        Command::Calibrate { inputs, recovery, infeasible, accrual, out } => {
            if !(0.0..1.0).contains(&recovery) {
                eprintln!("error: --recovery {recovery} is not a fraction in [0, 1)");
                return Ok(ExitCode::from(2));
            }
            if inputs.cds.is_none() || inputs.discount.is_none() {
                eprintln!("error: calibrate needs --cds and --discount");
                return Ok(ExitCode::from(2));
            }
            let calendar = match calendar_of(&inputs) {
                Ok(c) => c,
                Err(code) => return Ok(code),
            };
            let settings = CalibrateSettings {
                inputs: inputs.paths(),
                out,
                params: CalibrationParams {
                    recovery,
                    recovery_by_seniority: Default::default(),
                    calendar: calendar.clone(),
                    bootstrap: BootstrapSettings {
                    infeasible: match infeasible {
                        Infeasible::Floor => InfeasiblePolicy::Floor,
                        Infeasible::Fail => InfeasiblePolicy::Fail,
                    },
                    accrual: match accrual {
                        Accrual::Standard => AccrualIntegration::Standard,
                        Accrual::Exact => AccrualIntegration::Exact,
                    },
                    ..BootstrapSettings::default()
                    },
                },
                calendar,
                quality: QualitySettings::default(),
            };
            let started = std::time::Instant::now();
            match calibrate::run(&settings) {
                Ok(s) => {
                    print_counts(&s.counts);
                    print_reasons(&s.top_reasons);
                    println!("curves: {} ({} with every node ok), nodes: {}", s.curves, s.curves_complete, s.nodes);
                    for (status, n) in &s.nodes_by_status {
                        println!("  {status}: {n}");
                    }
                    println!("largest |residual| on ok nodes: {:.3e} bp", s.max_abs_residual_bp);
                    for p in &s.outputs {
                        println!("wrote {}", p.display());
                    }
                    tracing::info!(seconds = started.elapsed().as_secs_f64(), "calibrate finished");
                    Ok(ExitCode::SUCCESS)
                }
                Err(e) => {
                    eprintln!("error: {e}");
                    Ok(ExitCode::from(e.exit_code() as u8))
                }
            }
        }
        Command::Run { pipeline, out, label, shard, dates } => {
            let cfg = match hazardline::config::load_pipeline(&pipeline) {
                Ok(c) => c,
                Err(e) => {
                    eprintln!("error: {e}");
                    return Ok(ExitCode::from(2));
                }
            };
            let opts = hazardline::pipeline::RunOptions { out_root: out, label };
            if shard.is_some() || dates.is_some() {
                let (shard, dates) = (shard.unwrap_or(hazardline::partition::Shard::ALL), dates.unwrap_or_default());
                return match hazardline::pipeline::run_shard(&cfg, &opts, shard, dates) {
                    Ok(s) => {
                        let range = if dates.is_all() { String::new() } else { format!(", dates {dates}") };
                        println!("shard {shard}{range}: {} entities, {} curves", s.entities, s.curves);
                        for (stage, secs, _, _) in &s.timings {
                            tracing::info!(stage = stage.as_str(), seconds = secs, "stage finished");
                        }
                        println!("part: {}", s.part_dir.display());
                        Ok(ExitCode::SUCCESS)
                    }
                    Err(e) => {
                        eprintln!("error: {e}");
                        Ok(ExitCode::from(e.exit_code() as u8))
                    }
                };
            }
            finish_run(&cfg, hazardline::pipeline::run(&cfg, &opts))
        }
        Command::Merge { pipeline, out, label } => {
            let cfg = match hazardline::config::load_pipeline(&pipeline) {
                Ok(c) => c,
                Err(e) => {
                    eprintln!("error: {e}");
                    return Ok(ExitCode::from(2));
                }
            };
            finish_run(&cfg, hazardline::pipeline::merge(&cfg, &hazardline::pipeline::RunOptions { out_root: out, label }))
        }
        Command::Report { run_dir } => match hazardline::report::markdown::render(&run_dir) {
            Ok(()) => {
                println!("report: {}", run_dir.join("report.md").display());
                Ok(ExitCode::SUCCESS)
            }
            Err(e) => {
                eprintln!("error: {e}");
                Ok(ExitCode::from(2))
            }
        },
        Command::Compare { run_a, run_b, out } => match hazardline::commands::compare::compare(&run_a, &run_b) {
            Ok(text) => {
                match out {
                    Some(p) => {
                        if let Err(e) = hazardline::report::manifest::write_text(&p, &text) {
                            eprintln!("error: {e}");
                            return Ok(ExitCode::from(2));
                        }
                        println!("wrote {}", p.display());
                    }
                    None => print!("{text}"),
                }
                Ok(ExitCode::SUCCESS)
            }
            Err(e) => {
                eprintln!("error: {e}");
                Ok(ExitCode::from(2))
            }
        },
        Command::Demo { out_dir, seed, entities, years, start } => {
            if entities == 0 || years == 0 || years > 40 {
                eprintln!("error: --entities must be at least 1 and --years between 1 and 40");
                return Ok(ExitCode::from(2));
            }
            let spec = hazardline::sim::ScenarioSpec { seed, entities, years, start, ..hazardline::sim::ScenarioSpec::demo(seed) };
            match hazardline::commands::demo::write_demo(&out_dir, &spec) {
                Ok(s) => {
                    println!(
                        "wrote an invented universe to {}: {} entities, {} CDS quote rows, {} defaults, {} planted faults, {} files",
                        s.out.display(),
                        s.entities,
                        s.quotes,
                        s.defaults,
                        s.faults,
                        s.files.len()
                    );
                    println!("run it with: hazardline run {}", s.out.join("pipeline.toml").display());
                    Ok(ExitCode::SUCCESS)
                }
                Err(e) => {
                    eprintln!("error: {e}");
                    Ok(ExitCode::from(e.exit_code() as u8))
                }
            }
        }
        Command::Selfcheck { size, seed, keep } => {
            use hazardline::commands::selfcheck::{selfcheck, Size};
            let size = match size {
                CheckSize::Small => Size::Small,
                CheckSize::Large => Size::Large,
            };
            let tmp;
            let dir = match &keep {
                Some(d) => d.clone(),
                None => {
                    tmp = std::env::temp_dir().join(format!("hazardline-selfcheck-{}", std::process::id()));
                    tmp
                }
            };
            let result = selfcheck(&dir, &size.spec(seed));
            if keep.is_none() {
                let _ = std::fs::remove_dir_all(&dir);
            }
            match result {
                Ok(c) => {
                    print!("{}", c.table);
                    Ok(if c.passed { ExitCode::SUCCESS } else { ExitCode::from(1) })
                }
                Err(e) => {
                    eprintln!("error: {e}");
                    Ok(ExitCode::from(e.exit_code() as u8))
                }
            }
        }
        Command::Check { inputs, out } => {
            let calendar = match calendar_of(&inputs) {
                Ok(c) => c,
                Err(code) => return Ok(code),
            };
            let settings = CheckSettings { inputs: inputs.paths(), calendar, quality: QualitySettings::default(), out };
            match check::run(&settings) {
                Ok(s) => {
                    print_counts(&s.counts);
                    print_reasons(&s.top_reasons);
                    if !s.flags_by_rule.is_empty() {
                        println!("quality flags (rows kept):");
                        for (rule, n) in &s.flags_by_rule {
                            println!("  {rule:<24} {n:>10}");
                        }
                    }
                    for p in &s.outputs {
                        println!("wrote {}", p.display());
                    }
                    Ok(ExitCode::SUCCESS)
                }
                Err(e) => {
                    eprintln!("error: {e}");
                    Ok(ExitCode::from(e.exit_code() as u8))
                }
            }
        }
    }
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    init_logging(cli.verbose, cli.quiet);
    match run(cli) {
        Ok(code) => code,
        Err(e) => {
            eprintln!("error: {e:#}");
            ExitCode::from(2)
        }
    }
}
