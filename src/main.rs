//! The hazardline command line: parses flags into checked arguments and hands them to the
//! command's module (`hazardline::commands`), which prints what it did. This is the one place
//! that prints an error and picks the exit code: 0 done, 1 the command's own verdict failed
//! (red flags with `fail_on_red_flags`, a failed self-check), 2 an error (bad input, settings
//! or arguments, a file that cannot be read or written).

use clap::{Parser, Subcommand, ValueEnum};
use hazardline::calibrate::{BootstrapSettings, InfeasiblePolicy};
use hazardline::commands::calibrate::CalibrateSettings;
use hazardline::commands::check::CheckSettings;
use hazardline::error::{Error, Result};
use hazardline::ingest::{InputPaths, QualitySettings};
use hazardline::instruments::AccrualIntegration;
use hazardline::stages::calibrate::CalibrationParams;
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
    /// Log lines on stderr as text, or as one JSON object per line (for schedulers and log
    /// collectors; `run` and `merge` then also log each stage's timing and memory and each
    /// table's row counts).
    #[arg(long, value_enum, default_value = "text", global = true)]
    log_format: LogFormat,
    #[command(subcommand)]
    command: Command,
}

#[derive(Clone, Copy, PartialEq, ValueEnum)]
enum LogFormat {
    Text,
    Json,
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
    /// The published standard model: split at every curve node inside a coupon period, with
    /// the half-day term (the default).
    Published,
    /// One interval per coupon period, no half-day term.
    Standard,
    /// Split at every curve node inside a coupon period, no half-day term.
    Exact,
}

/// Input tables; each may be a CSV or Parquet file, or a folder of them.
#[derive(clap::Args, Clone)]
struct Inputs {
    /// cds_quotes table.
    #[arg(long)]
    cds: Option<PathBuf>,
    /// discount table (zero rates or discount factors by tenor or date).
    #[arg(long)]
    discount: Option<PathBuf>,
    /// rate_quotes table (deposits and swaps: the standard curve where discount has none).
    #[arg(long)]
    rate_quotes: Option<PathBuf>,
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
            rate_quotes: self.rate_quotes.clone(),
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
        #[arg(long, value_enum, default_value_t = Accrual::Published)]
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
        shard: Option<hazardline::parts::Shard>,
        /// Run only the per-entity stages for the curve dates FROM..TO (both included, either
        /// end may be left open, e.g. `..2016-12-31`, `2017-01-01..`) and write their part
        /// beside the run folder, as --shard does (with or without --shard); `merge` finishes
        /// the run once parts cover every date of every shard.
        #[arg(long, value_name = "FROM..TO", value_parser = parse_dates)]
        dates: Option<hazardline::parts::DateRange>,
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
        #[arg(long, default_value = "2015-01-01", value_parser = hazardline::stages::universe::parse_start)]
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
    /// Measure each stability rule on invented universes: its false-alarm rate on a universe
    /// without instabilities and its detection rate on planted ones (whole pipeline, twice).
    FlagRates {
        #[arg(long, default_value_t = 200)]
        entities: usize,
        #[arg(long, default_value_t = 3)]
        years: u32,
        /// Instabilities planted on distinct entities (alternately a premium shift and a
        /// quarter of noisy quotes).
        #[arg(long, default_value_t = 40)]
        instabilities: usize,
        #[arg(long, default_value_t = 5)]
        seed: u64,
        /// Keep both universes and runs in this folder instead of a temporary one.
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

fn init_logging(verbose: u8, quiet: bool, format: LogFormat) {
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
    // In JSON the stage timings and row counts are logged whatever the level (not under -q).
    let level = match format {
        LogFormat::Json if !quiet => format!("{level},hazardline::stage=info,hazardline::counts=info"),
        _ => level.to_string(),
    };
    let filter = tracing_subscriber::EnvFilter::try_from_default_env()
        .unwrap_or_else(|_| tracing_subscriber::EnvFilter::new(level));
    let builder = tracing_subscriber::fmt().with_env_filter(filter).with_writer(std::io::stderr);
    let _ = match format {
        LogFormat::Text => builder.with_ansi(std::io::stderr().is_terminal()).try_init(),
        LogFormat::Json => {
            hazardline::report::progress::HIDDEN.store(true, std::sync::atomic::Ordering::Relaxed);
            builder.json().flatten_event(true).with_current_span(false).try_init()
        }
    };
}

fn calendar_of(inputs: &Inputs) -> Result<Calendar> {
    match &inputs.holidays {
        Some(p) => hazardline::config::read_holidays(p).map_err(Error::Usage),
        None => Ok(Calendar::weekends_only()),
    }
}

fn parse_shard(s: &str) -> std::result::Result<hazardline::parts::Shard, String> {
    hazardline::parts::Shard::parse(s)
}

fn parse_dates(s: &str) -> std::result::Result<hazardline::parts::DateRange, String> {
    hazardline::parts::DateRange::parse(s)
}

/// Checks the arguments clap cannot, and runs the command.
fn dispatch(command: Command) -> Result<u8> {
    use hazardline::commands;
    match command {
        Command::Calibrate { inputs, recovery, infeasible, accrual, out } => {
            if !(0.0..1.0).contains(&recovery) {
                return Err(Error::Usage(format!("--recovery {recovery} is not a fraction in [0, 1)")));
            }
            if inputs.cds.is_none() || (inputs.discount.is_none() && inputs.rate_quotes.is_none()) {
                return Err(Error::Usage("calibrate needs --cds and --discount or --rate-quotes".into()));
            }
            let calendar = calendar_of(&inputs)?;
            let bootstrap = BootstrapSettings {
                infeasible: match infeasible {
                    Infeasible::Floor => InfeasiblePolicy::Floor,
                    Infeasible::Fail => InfeasiblePolicy::Fail,
                },
                accrual: match accrual {
                    Accrual::Published => AccrualIntegration::Published,
                    Accrual::Standard => AccrualIntegration::Standard,
                    Accrual::Exact => AccrualIntegration::Exact,
                },
                ..BootstrapSettings::default()
            };
            let params = CalibrationParams {
                recovery,
                recovery_by_seniority: Default::default(),
                calendar: calendar.clone(),
                bootstrap,
                // The discount table's zero rates: continuously compounded Act/365F (the
                // pipeline file can say otherwise; this command keeps the default).
                zero_rates: Default::default(),
                // Rate quotes take each currency's default standard-curve convention.
                rate_conventions: Default::default(),
                rate_calendars: Default::default(),
                seniority_order: Vec::new(),
                standard_coupons: Default::default(),
                // The calibrate command writes no sensitivities table.
                sensitivity_dates: Default::default(),
                // Nor the quote conversions: the command is the bootstrap's own benchmark.
                quote_conversions: false,
            };
            commands::calibrate::run(&CalibrateSettings {
                inputs: inputs.paths(),
                out,
                params,
                calendar,
                quality: QualitySettings::default(),
            })
        }
        Command::Run { pipeline, out, label, shard, dates } => {
            commands::run::run(&pipeline, &hazardline::run::RunOptions { out_root: out, label }, shard, dates)
        }
        Command::Merge { pipeline, out, label } => {
            commands::merge::run(&pipeline, &hazardline::run::RunOptions { out_root: out, label })
        }
        Command::Report { run_dir } => commands::report::run(&run_dir),
        Command::Compare { run_a, run_b, out } => commands::compare::run(&run_a, &run_b, out.as_deref()),
        Command::Demo { out_dir, seed, entities, years, start } => {
            let spec = hazardline::sim::ScenarioSpec {
                seed,
                entities,
                years,
                start,
                ..hazardline::sim::ScenarioSpec::demo(seed)
            };
            commands::demo::run(&out_dir, &spec)
        }
        Command::Selfcheck { size, seed, keep } => {
            let size = match size {
                CheckSize::Small => hazardline::run::selfcheck::Size::Small,
                CheckSize::Large => hazardline::run::selfcheck::Size::Large,
            };
            commands::selfcheck::run(size, seed, keep.as_deref())
        }
        Command::FlagRates { entities, years, instabilities, seed, keep } => {
            let spec = hazardline::sim::ScenarioSpec {
                entities,
                years,
                instabilities,
                ..hazardline::sim::ScenarioSpec::demo(seed)
            };
            commands::flag_rates::run(&spec, keep.as_deref())
        }
        Command::Check { inputs, out } => {
            let calendar = calendar_of(&inputs)?;
            commands::check::run(&CheckSettings {
                inputs: inputs.paths(),
                calendar,
                quality: QualitySettings::default(),
                out,
            })
        }
    }
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    init_logging(cli.verbose, cli.quiet, cli.log_format);
    match dispatch(cli.command) {
        Ok(code) => ExitCode::from(code),
        Err(e) => {
            if cli.log_format == LogFormat::Json {
                // The error as a JSON line like every other on stderr.
                tracing::error!(target: "hazardline::exit", exit_code = e.exit_code(), "{e}");
            } else {
                eprintln!("error: {e}");
            }
            ExitCode::from(e.exit_code())
        }
    }
}
