//! The hazardline command line. Parses flags, builds checked settings, calls the library,
//! prints a summary, sets the exit code. Nothing else lives here.

use clap::{Parser, Subcommand, ValueEnum};
use hazardline::calibrate::{BootstrapSettings, InfeasiblePolicy};
use hazardline::commands::calibrate::{self, CalibrateSettings};
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
enum Accrual {
    /// One interval per coupon period (the standard model).
    Standard,
    /// Split at every curve node inside a coupon period.
    Exact,
}

#[derive(Subcommand)]
enum Command {
    /// Bootstrap hazard curves from CDS quotes and write hazard_curves, calibration_residuals
    /// and rejects as Parquet into --out.
    Calibrate {
        /// cds_quotes table: CSV or Parquet file, or a folder of them.
        #[arg(long)]
        cds: PathBuf,
        /// discount table (zero rates): CSV or Parquet file, or a folder of them.
        #[arg(long)]
        discount: PathBuf,
        /// Recovery rate for quotes without one (fraction).
        #[arg(long, default_value_t = 0.40)]
        recovery: f64,
        /// What to do with a quote that would need a negative hazard.
        #[arg(long, value_enum, default_value_t = Infeasible::Floor)]
        infeasible: Infeasible,
        /// Accrual-on-default integration.
        #[arg(long, value_enum, default_value_t = Accrual::Standard)]
        accrual: Accrual,
        /// A holiday list (one ISO date per line) added to the weekends.
        #[arg(long)]
        holidays: Option<PathBuf>,
        /// Output folder.
        #[arg(long)]
        out: PathBuf,
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

fn read_holidays(path: &PathBuf) -> anyhow::Result<Calendar> {
    let text = std::fs::read_to_string(path).map_err(|e| anyhow::anyhow!("{}: {e}", path.display()))?;
    let mut days = Vec::new();
    for (i, line) in text.lines().enumerate() {
        let t = line.trim();
        if t.is_empty() || t.starts_with('#') || t.eq_ignore_ascii_case("date") {
            continue;
        }
        let d = hazardline::time::parse_iso_date(t)
            .ok_or_else(|| anyhow::anyhow!("{} line {}: {t:?} is not an ISO date yyyy-mm-dd", path.display(), i + 1))?;
        days.push(d);
    }
    Ok(Calendar::with_holidays(days))
}

fn run(cli: Cli) -> anyhow::Result<ExitCode> {
    match cli.command {
        Command::Calibrate { cds, discount, recovery, infeasible, accrual, holidays, out } => {
            if !(0.0..1.0).contains(&recovery) {
                eprintln!("error: --recovery {recovery} is not a fraction in [0, 1)");
                return Ok(ExitCode::from(2));
            }
            let calendar = match &holidays {
                Some(p) => match read_holidays(p) {
                    Ok(c) => c,
                    Err(e) => {
                        eprintln!("error: {e}");
                        return Ok(ExitCode::from(2));
                    }
                },
                None => Calendar::weekends_only(),
            };
            let settings = CalibrateSettings {
                cds,
                discount,
                out,
                recovery,
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
                calendar,
            };
            let started = std::time::Instant::now();
            match calibrate::run(&settings) {
                Ok(s) => {
                    println!("cds_quotes: {} rows in = {} used + {} rejected", s.cds.rows_in, s.cds.used, s.cds.rejected);
                    println!("discount:   {} rows in = {} used + {} rejected", s.discount.rows_in, s.discount.used, s.discount.rejected);
                    println!("curves: {} ({} with every node ok), nodes: {}", s.curves, s.curves_complete, s.nodes);
                    for (status, n) in &s.nodes_by_status {
                        println!("  {status}: {n}");
                    }
                    println!("largest |residual| on ok nodes: {:.3e} bp", s.max_abs_residual_bp);
                    for p in &s.outputs {
                        println!("wrote {}", calibrate::show(p));
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
