//! Pipeline files (TOML): the file as written ([`PipelineFile`], serde, unknown keys refused)
//! and the checked run configuration built from it ([`RunConfig`]), the only thing stages
//! accept. Paths in the file are relative to the file's own folder.
//!
//! Every setting has a default, documented on its field; `pipelines/quarterly-review.toml`
//! shows them all with comments.

use crate::backtest::{BacktestSettings, CensoringPolicy};
use crate::calibrate::cir::CirFitMode;
use crate::calibrate::{BootstrapSettings, InfeasiblePolicy};
use crate::error::{Error, Result};
use crate::ingest::{InputPaths, QualitySettings};
use crate::instruments::bond::RecoveryConvention;
use crate::instruments::AccrualIntegration;
use crate::stability::{CusumLevel, CusumTarget};
use crate::time::{parse_iso_date, Calendar};
use chrono::NaiveDate;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// Checked settings of the bond and CIR fits (from `[calibration]`).
#[derive(Debug, Clone, PartialEq)]
pub struct IntensitySettings {
    pub bond_fit: bool,
    pub cir: bool,
    pub cir_mode: CirFitMode,
    /// Business days per window of the fixed-kappa-sigma mode.
    pub cir_window: usize,
    pub bond_convention: RecoveryConvention,
    /// Fit CIR only for these entities (None: every entity).
    pub cir_entities: Option<Vec<String>>,
}

impl Default for IntensitySettings {
    fn default() -> Self {
        IntensitySettings {
            bond_fit: false,
            cir: false,
            cir_mode: CirFitMode::Free,
            cir_window: 20,
            bond_convention: RecoveryConvention::Par,
            cir_entities: None,
        }
    }
}

pub use crate::backtest::CohortFrequency;

/// The stage's settings beyond the core's.
#[derive(Debug, Clone, PartialEq)]
pub struct BacktestStage {
    pub enabled: bool,
    pub frequency: CohortFrequency,
    /// The core settings; `cohort_dates` is filled from the data.
    pub core: BacktestSettings,
    /// Recoveries of the sensitivity scenarios (the base recovery is the run's).
    pub recovery_scenarios: Vec<f64>,
    /// An earlier run folder whose pooled AUCs this review's are tested against.
    pub reference_run: Option<PathBuf>,
}

impl BacktestStage {
    /// The settings in force as (name, value) pairs.
    pub fn pairs(&self) -> Vec<(String, String)> {
        use crate::backtest::Bucketing;
        let c = &self.core;
        vec![
            ("enabled".into(), self.enabled.to_string()),
            (
                "cohorts".into(),
                match self.frequency {
                    CohortFrequency::Annual => "annual (first business day of each year)",
                    CohortFrequency::Quarterly => "quarterly (first business day of each quarter)",
                }
                .into(),
            ),
            ("horizons_years".into(), format!("{:?}", c.horizons_years)),
            ("lookback_days".into(), c.lookback_days.to_string()),
            (
                "censoring".into(),
                match c.censoring {
                    CensoringPolicy::Exclude => "exclude from n (exposure kept)",
                    CensoringPolicy::CountAsSurvivor => "count as survivor",
                }
                .into(),
            ),
            (
                "buckets".into(),
                match &c.bucketing {
                    Bucketing::Grades => "internal grade as of the cohort date".to_string(),
                    Bucketing::PdEdges(e) => format!("implied-PD bands with edges {e:?}"),
                    Bucketing::PdQuantiles(k) => format!("{k} implied-PD quantile bands"),
                },
            ),
            ("level".into(), c.level.to_string()),
            ("zone_yellow".into(), c.zones.yellow.to_string()),
            ("zone_red".into(), c.zones.red.to_string()),
            ("recovery_scenarios".into(), format!("{:?}", self.recovery_scenarios)),
            (
                "outcome_end".into(),
                c.outcome_end.map_or("the last quote date of the input".to_string(), |d| d.to_string()),
            ),
            (
                "asset_correlation".into(),
                match c.correlation {
                    crate::backtest::AssetCorrelation::Supervisory => {
                        "supervisory corporate formula of each bucket's one-year PD".to_string()
                    }
                    crate::backtest::AssetCorrelation::Fixed(r) => r.to_string(),
                },
            ),
            ("term_structure_years".into(), c.term_structure_years.to_string()),
            (
                "reference_run".into(),
                self.reference_run.as_ref().map_or("none".to_string(), |p| p.display().to_string()),
            ),
        ]
    }
}

/// The longest look-back of a backtest member's curve, in calendar days (ten years).
pub const MAX_LOOKBACK_DAYS: i64 = 3653;

/// The longest pipeline name or run label, in characters.
pub const MAX_FOLDER_NAME: usize = 100;

/// Whether `value` can name a folder of the output root: one plain path component of 1 to
/// [`MAX_FOLDER_NAME`] characters from letters, digits, `.`, `_` and `-`, not starting with `.`
/// (so never `.`, `..`, a hidden or work folder, an absolute path or a path that climbs out).
/// Pipeline names and run labels go through it before anything touches the disk.
pub fn check_folder_name(value: &str) -> std::result::Result<(), String> {
    let plain = |c: char| c.is_ascii_alphanumeric() || matches!(c, '.' | '_' | '-');
    if value.is_empty()
        || value.chars().count() > MAX_FOLDER_NAME
        || value.starts_with('.')
        || !value.chars().all(plain)
    {
        return Err(format!(
            "{value:?} cannot name a folder of the output root: use 1 to {MAX_FOLDER_NAME} letters, digits, '.', '_' or '-', not starting with '.'"
        ));
    }
    Ok(())
}

/// The pipeline file as written.
#[derive(Debug, Clone, Deserialize, Serialize, Default)]
#[serde(deny_unknown_fields)]
pub struct PipelineFile {
    /// Name of the pipeline: the output folder under the output root. Default: the file name
    /// without `.toml`.
    pub name: Option<String>,
    #[serde(default)]
    pub inputs: InputsSection,
    #[serde(default)]
    pub conventions: ConventionsSection,
    /// `[rate_conventions.<currency>]`: the standard curve's conventions for a currency
    /// (beside the defaults for USD, EUR, GBP and JPY).
    #[serde(default)]
    pub rate_conventions: BTreeMap<String, RateConventionSection>,
    /// `[calendars]`: a holiday file (one ISO date per line) per currency, for that currency's
    /// standard curve (spot and Modified Following) and its CDS contracts (roll, coupon,
    /// step-in and cash-settlement dates). A currency without one uses `inputs.holidays` (or
    /// weekends only).
    #[serde(default)]
    pub calendars: BTreeMap<String, PathBuf>,
    #[serde(default)]
    pub calibration: CalibrationSection,
    #[serde(default)]
    pub quality: QualitySection,
    #[serde(default)]
    pub backtest: BacktestSection,
    #[serde(default)]
    pub stability: StabilitySection,
    #[serde(default)]
    pub report: ReportSection,
}

/// `[rate_conventions.<currency>]`: every field is required (a partial convention would mix
/// silently with the defaults).
#[derive(Debug, Clone, Deserialize, Serialize)]
#[serde(deny_unknown_fields)]
pub struct RateConventionSection {
    /// Business days from the curve date to spot.
    pub spot_lag: u32,
    /// `ACT/360`, `ACT/365F` or `30/360`.
    pub deposit_day_count: String,
    /// Months between fixed-leg payments: 1, 3, 6 or 12.
    pub fixed_months: u32,
    pub fixed_day_count: String,
    /// The floating index's tenor in months (recorded; the single-curve build values the
    /// floating leg at par).
    pub float_months: u32,
}

/// `[backtest]`: implied against realised default rates, and the risk premium.
#[derive(Debug, Clone, Deserialize, Serialize, Default)]
#[serde(deny_unknown_fields)]
pub struct BacktestSection {
    /// Run the backtest. Default: when grades, defaults or a cohort history are given.
    pub enabled: Option<bool>,
    /// `annual` (default: first business day of each year) or `quarterly`.
    pub cohorts: Option<CohortFrequency>,
    /// Horizons in whole years. Default [1].
    pub horizons: Option<Vec<u32>>,
    /// A cohort member's curve is its latest within this many calendar days. Default 10.
    pub lookback_days: Option<i64>,
    /// `exclude` (default) or `survivor`: what a member that leaves coverage inside the
    /// horizon counts as in the d / n tests (exposure is exact either way; the realised rate
    /// of a bucket with censored members is the Kaplan-Meier estimate).
    pub censoring: Option<CensoringPolicy>,
    /// `grade` (default when grades are given) or `pd_bands`.
    pub buckets: Option<BucketChoice>,
    /// Implied-PD band edges (decimals) for `pd_bands`; without them, `pd_quantiles`.
    pub pd_edges: Option<Vec<f64>>,
    /// Number of implied-PD quantile bands. Default 5.
    pub pd_quantiles: Option<usize>,
    /// Two-sided confidence level of the intervals. Default 0.95.
    pub level: Option<f64>,
    /// Upper-tail binomial p-value under which a bucket is yellow. Default 0.05.
    pub zone_yellow: Option<f64>,
    /// ... and red. Default 0.001.
    pub zone_red: Option<f64>,
    /// Recoveries of the sensitivity scenarios. Default [0.25, 0.55].
    pub recovery_scenarios: Option<Vec<f64>>,
    /// The last date the defaults table covers (ISO date, quoted): a horizon ending after it
    /// is incomplete. Default: the last quote date of the input.
    pub outcome_end: Option<NaiveDate>,
    /// Asset correlation of the one-factor (Vasicek) bucket tests: a number in [0, 1), or
    /// "supervisory" (default: the supervisory corporate formula of each bucket's PD).
    pub asset_correlation: Option<CorrelationChoice>,
    /// The default term structure over years 1..=this, every cohort. Default 5; 0 keeps it to
    /// the tested horizons.
    pub term_structure_years: Option<u32>,
    /// An earlier run folder (the folder holding its `manifest.json` and `tables/`, relative
    /// to this file): the pooled AUCs of this review are tested against its
    /// `backtest_discrimination`.
    pub reference_run: Option<PathBuf>,
}

/// `backtest.asset_correlation` as written: a number or the word "supervisory".
#[derive(Debug, Clone, Copy, PartialEq, Deserialize, Serialize)]
#[serde(untagged)]
pub enum CorrelationChoice {
    Fixed(f64),
    Named(CorrelationName),
}

/// The named asset-correlation choices.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum CorrelationName {
    Supervisory,
}

fn backtest_stage(k: &BacktestSection, inputs: &InputPaths, path: &Path) -> Result<BacktestStage> {
    use crate::backtest::{AssetCorrelation, Bucketing, CensoringPolicy};
    let enabled =
        k.enabled.unwrap_or(inputs.grades.is_some() || inputs.defaults.is_some() || inputs.cohort_history.is_some());
    let frequency = k.cohorts.unwrap_or(CohortFrequency::Annual);
    let censoring = k.censoring.unwrap_or(CensoringPolicy::Exclude);
    let default_buckets = if inputs.grades.is_some() { BucketChoice::Grade } else { BucketChoice::PdBands };
    let bucketing = match k.buckets.unwrap_or(default_buckets) {
        BucketChoice::Grade => Bucketing::Grades,
        BucketChoice::PdBands => match &k.pd_edges {
            Some(e) => Bucketing::PdEdges(e.clone()),
            None => Bucketing::PdQuantiles(k.pd_quantiles.unwrap_or(5)),
        },
    };
    let zones = crate::stats::ZoneThresholds::new(k.zone_yellow.unwrap_or(0.05), k.zone_red.unwrap_or(0.001))
        .map_err(|e| bad(path, "backtest.zone_yellow / zone_red", e.to_string()))?;
    // The cohort dates come from the data at run time (`backtest::cohort_dates`); a
    // stand-in date here lets `check` validate every other setting now, at load time.
    let core = BacktestSettings {
        cohort_dates: vec![NaiveDate::from_ymd_opt(2000, 1, 3).unwrap_or_default()],
        horizons_years: k.horizons.clone().unwrap_or_else(|| vec![1]),
        lookback_days: match k.lookback_days.unwrap_or(10) {
            d @ 0..=MAX_LOOKBACK_DAYS => d,
            d => {
                return Err(bad(
                    path,
                    "backtest.lookback_days",
                    format!("{d} is not a number of days from 0 to {MAX_LOOKBACK_DAYS}"),
                ))
            }
        },
        censoring,
        bucketing,
        level: k.level.unwrap_or(0.95),
        zones,
        outcome_end: k.outcome_end,
        correlation: match k.asset_correlation {
            None | Some(CorrelationChoice::Named(CorrelationName::Supervisory)) => AssetCorrelation::Supervisory,
            Some(CorrelationChoice::Fixed(r)) => AssetCorrelation::Fixed(r),
        },
        term_structure_years: k.term_structure_years.unwrap_or(5),
    };
    core.check().map_err(|e| bad(path, "backtest", e.to_string()))?;
    let recovery_scenarios = k.recovery_scenarios.clone().unwrap_or_else(|| vec![0.25, 0.55]);
    if let Some(r) = recovery_scenarios.iter().find(|r| !(0.0..1.0).contains(*r)) {
        return Err(bad(path, "backtest.recovery_scenarios", format!("{r} is not a fraction in [0, 1)")));
    }
    let reference_run = match &k.reference_run {
        None => None,
        Some(p) => {
            let full = if p.is_absolute() { p.clone() } else { path.parent().unwrap_or(Path::new("")).join(p) };
            let table = full.join("tables").join("backtest_discrimination.parquet");
            if !table.is_file() {
                return Err(bad(
                    path,
                    "backtest.reference_run",
                    format!(
                        "{} has no tables/backtest_discrimination.parquet (resolved to {})",
                        p.display(),
                        full.display()
                    ),
                ));
            }
            Some(full)
        }
    };
    Ok(BacktestStage { enabled, frequency, core, recovery_scenarios, reference_run })
}

/// `[stability]`: the parameter-stability and residual review (defaults on each field of
/// [`crate::stability::StabilitySettings`]).
#[derive(Debug, Clone, Deserialize, Serialize, Default)]
#[serde(deny_unknown_fields)]
pub struct StabilitySection {
    /// `month`, `quarter` (default), `half_year` or `year`.
    pub period: Option<String>,
    /// A daily move is large above this fraction of the previous value. Default 0.10.
    pub move_threshold: Option<f64>,
    /// Per-series large-move thresholds (fractions), e.g. `{ cir_kappa = 0.25 }`.
    pub move_thresholds: Option<BTreeMap<String, f64>>,
    pub large_move_share_max: Option<f64>,
    pub cv_max: Option<f64>,
    pub change_max: Option<f64>,
    pub market_ratio_max: Option<f64>,
    pub param_move_min: Option<f64>,
    /// PSI bucket edges of the implied PD (decimals). Default: the earlier period's deciles.
    pub psi_edges: Option<Vec<f64>>,
    pub psi_amber: Option<f64>,
    pub psi_red: Option<f64>,
    pub psi_min_entities: Option<usize>,
    /// Fewest entities behind a universe row for its change rules to flag. Default 10.
    pub universe_min_entities: Option<usize>,
    /// Series tested for breaks. Default the CIR kappa, theta and sigma.
    pub cusum_series: Option<Vec<String>>,
    /// `10%`, `5%` (default) or `1%`.
    pub cusum_level: Option<CusumLevel>,
    /// `auto` (default: levels or daily changes by the Dickey-Fuller test), `levels` or
    /// `daily_changes`.
    pub cusum_target: Option<CusumTarget>,
    pub cusum_min_obs: Option<usize>,
    /// Residual flag thresholds in bp by method, e.g. `{ cir = 10.0, bond_fit = 10.0 }`.
    pub residual_flag_bp: Option<BTreeMap<String, f64>>,
    pub reprice_tolerance_bp: Option<f64>,
    pub worst_n: Option<usize>,
}

/// `[inputs]`: where each table is (file, folder or hive-partitioned folder).
#[derive(Debug, Clone, Deserialize, Serialize, Default)]
#[serde(deny_unknown_fields)]
pub struct InputsSection {
    pub cds_quotes: Option<PathBuf>,
    pub discount: Option<PathBuf>,
    /// Deposit and swap quotes: the standard curve of each (date, currency) the discount table
    /// does not give.
    pub rate_quotes: Option<PathBuf>,
    pub bonds: Option<PathBuf>,
    pub bond_quotes: Option<PathBuf>,
    pub entities: Option<PathBuf>,
    pub grades: Option<PathBuf>,
    pub defaults: Option<PathBuf>,
    pub cohort_history: Option<PathBuf>,
    /// One ISO date per line, added to the weekends. Default: weekends only.
    pub holidays: Option<PathBuf>,
}

/// `[conventions]`.
#[derive(Debug, Clone, Deserialize, Serialize, Default)]
#[serde(deny_unknown_fields)]
pub struct ConventionsSection {
    /// Recovery for quotes without one and without a seniority in `recovery_by_seniority`.
    /// Default 0.40 (senior unsecured, common practice).
    pub recovery: Option<f64>,
    /// Recovery by the quotes' `seniority` value. Default: empty.
    pub recovery_by_seniority: Option<BTreeMap<String, f64>>,
    /// Standard running coupon (bp) by currency: the coupon of a quoted spread without
    /// `coupon_bp` and of the 5Y contract the sensitivities measure. Default 100 for every
    /// currency (the standard contract's investment-grade coupon, common practice).
    pub standard_coupon_bp: Option<BTreeMap<String, f64>>,
    /// Seniorities in order of preference for an entity's reference curve (the tier the
    /// bond basis, the CIR fit and the backtest use when a name is quoted in several tiers on
    /// a date). Default: empty (name order, an absent seniority first).
    pub seniority_order: Option<Vec<String>>,
    /// `floor` (default) or `fail`: what to do with a quote that needs a negative hazard.
    pub infeasible: Option<InfeasiblePolicy>,
    /// `published` (default: the published standard model), `standard` or `exact`
    /// accrual-on-default integration.
    pub accrual_on_default: Option<AccrualIntegration>,
    /// Compounding of the discount table's zero rates: `continuous` (default), `annual`,
    /// `semi_annual`, `quarterly` or `simple`.
    pub zero_rate_compounding: Option<crate::curves::Compounding>,
    /// Day count of the discount table's zero rates: `act365f` (default) or `act360`.
    pub zero_rate_day_count: Option<crate::curves::RateDayCount>,
}

/// `[calibration]`.
#[derive(Debug, Clone, Deserialize, Serialize, Default)]
#[serde(deny_unknown_fields)]
pub struct CalibrationSection {
    /// Bootstrap CDS hazard curves. Default true.
    pub cds_bootstrap: Option<bool>,
    /// Fit bond-implied hazard curves (and the CDS-bond basis). Default true when both
    /// inputs.bonds and inputs.bond_quotes are given, else false.
    pub bond_fit: Option<bool>,
    /// Fit the CIR intensity model to every bootstrapped CDS curve. Default false.
    pub cir: Option<bool>,
    /// `free` (default: kappa, theta, sigma, lambda0 fitted daily) or `fixed_kappa_sigma`
    /// (kappa and sigma estimated per window, theta and lambda0 daily).
    pub cir_mode: Option<CirFitMode>,
    /// Window length in business days of the `fixed_kappa_sigma` mode. Default 20.
    pub cir_window: Option<usize>,
    /// Fit the CIR model only for these entities. Default: every entity.
    pub cir_entities: Option<Vec<String>>,
    /// Bond recovery convention: `par` (default, recovery of face), `zero` or `market`
    /// (recovery of market value).
    pub bond_recovery_convention: Option<RecoveryConvention>,
    /// The curve dates whose curves get the sensitivity shifts (table `sensitivities`):
    /// `"month_ends"` (default: the last business day of each month), `"off"`, or a list of
    /// ISO dates.
    pub sensitivity_dates: Option<SensitivityDatesSetting>,
    /// Convert every calibrated quote to par spread, upfront at the standard coupon and quoted
    /// spread (columns of `calibration_residuals`, table `cds_quote_conversions`). Default true.
    pub quote_conversions: Option<bool>,
}

/// `calibration.sensitivity_dates`: a word or a list of dates.
#[derive(Debug, Clone, Deserialize, Serialize)]
#[serde(untagged)]
pub enum SensitivityDatesSetting {
    Word(String),
    Dates(Vec<String>),
}

/// `[quality]`: thresholds of the data-quality rules (defaults in `QualitySettings`).
#[derive(Debug, Clone, Deserialize, Serialize, Default)]
#[serde(deny_unknown_fields)]
pub struct QualitySection {
    pub max_spread_bp: Option<f64>,
    pub min_spread_bp: Option<f64>,
    pub zero_rate_band: Option<[f64; 2]>,
    pub bond_price_band: Option<[f64; 2]>,
    pub stale_days: Option<usize>,
    pub spike_z: Option<f64>,
    pub spike_min_log_move: Option<f64>,
    pub spike_revert_share: Option<f64>,
    pub unit_slip_ratio: Option<f64>,
    pub unit_slip_min_run: Option<usize>,
    pub min_tenors: Option<usize>,
}

/// `[report]`.
#[derive(Debug, Clone, Deserialize, Serialize, Default)]
#[serde(deny_unknown_fields)]
pub struct ReportSection {
    /// Where run folders go. Default `validation-reports` beside the pipeline folder's parent
    /// (`../validation-reports` for a file in `pipelines/`).
    pub output_root: Option<PathBuf>,
    /// Run label (the run folder's name). Default `asof-<last quote date>`.
    pub label: Option<String>,
    /// Entities drawn in the figures. Default: the first four by name.
    pub charted_entities: Option<Vec<String>>,
    /// Dates of the hazard term-structure figure (ISO). Default: first, middle and last date.
    pub term_structure_dates: Option<Vec<String>>,
    /// Exit with code 1 when the run has red flags. Default false.
    pub fail_on_red_flags: Option<bool>,
    /// How `hazard_curves` and `calibration_residuals` are written: `single` (one file each),
    /// `by_year` (a folder each, a file per source or method and year) or `auto` (default:
    /// `by_year` when the usable CDS quotes number more than [`LARGE_RUN_QUOTES`]).
    pub large_tables: Option<LargeTables>,
}

/// Usable CDS quotes above which `large_tables = "auto"` writes the two large tables by year.
pub const LARGE_RUN_QUOTES: usize = 10_000_000;

/// How the two large tables are written (`report.large_tables`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum LargeTables {
    #[default]
    Auto,
    Single,
    ByYear,
}
hazardline_core::text_form!(LargeTables { Auto => "auto", Single => "single", ByYear => "by_year" });

/// How backtest members are bucketed (`backtest.buckets`): by grade, or by implied-PD band.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum BucketChoice {
    Grade,
    PdBands,
}
hazardline_core::text_form!(BucketChoice { Grade => "grade", PdBands => "pd_bands" });

impl LargeTables {
    /// Whether a run of `usable_quotes` CDS quotes writes them as folders of files by year.
    pub fn split(self, usable_quotes: usize) -> bool {
        match self {
            LargeTables::Auto => usable_quotes > LARGE_RUN_QUOTES,
            LargeTables::Single => false,
            LargeTables::ByYear => true,
        }
    }
}

/// The checked configuration of a run, after defaults.
#[derive(Debug, Clone, Serialize)]
pub struct RunConfig {
    pub name: String,
    /// The pipeline file, as given.
    #[serde(skip)]
    pub pipeline_path: PathBuf,
    /// Input paths resolved against the pipeline file's folder.
    #[serde(skip)]
    pub inputs: InputPaths,
    /// Input paths as written (for the manifest, independent of where the run happens).
    pub inputs_as_written: BTreeMap<String, String>,
    pub holidays: Option<String>,
    #[serde(skip)]
    pub calendar: Calendar,
    pub recovery: f64,
    pub recovery_by_seniority: BTreeMap<String, f64>,
    pub seniority_order: Vec<String>,
    pub standard_coupons: BTreeMap<String, f64>,
    pub sensitivity_dates: crate::calibrate::sensitivity::SensitivityDates,
    pub quote_conversions: bool,
    pub infeasible: InfeasiblePolicy,
    pub accrual_on_default: AccrualIntegration,
    pub zero_rate_compounding: crate::curves::Compounding,
    pub zero_rate_day_count: crate::curves::RateDayCount,
    /// Standard-curve conventions given in the pipeline file, by currency.
    #[serde(skip)]
    pub rate_conventions: BTreeMap<String, crate::curves::rates::RateConvention>,
    /// Holiday files by currency, as written in the pipeline file.
    pub calendars: BTreeMap<String, String>,
    /// The calendars they give.
    #[serde(skip)]
    pub currency_calendars: BTreeMap<String, Calendar>,
    pub cds_bootstrap: bool,
    #[serde(skip)]
    pub bootstrap: BootstrapSettings,
    pub bond_fit: bool,
    pub cir: bool,
    pub cir_mode: CirFitMode,
    pub cir_window: usize,
    pub cir_entities: Option<Vec<String>>,
    pub bond_recovery_convention: RecoveryConvention,
    /// The five settings above, typed.
    #[serde(skip)]
    pub intensity: IntensitySettings,
    #[serde(serialize_with = "ser_quality")]
    pub quality: QualitySettings,
    #[serde(skip)]
    pub output_root: PathBuf,
    pub label: Option<String>,
    pub charted_entities: Option<Vec<String>>,
    pub term_structure_dates: Option<Vec<NaiveDate>>,
    pub fail_on_red_flags: bool,
    /// Not among the manifest's settings: the manifest lists the files the tables went to.
    #[serde(skip)]
    pub large_tables: LargeTables,
    #[serde(skip)]
    pub backtest: BacktestStage,
    /// The backtest settings in force, as (name, value) pairs for the manifest and the notes.
    pub backtest_settings: Vec<(String, String)>,
    #[serde(skip)]
    pub stability: crate::stability::StabilitySettings,
    /// The stability settings as (name, value) pairs, for the manifest and the method notes.
    pub stability_settings: Vec<(String, String)>,
}

fn stability_settings(k: &StabilitySection, path: &Path) -> Result<crate::stability::StabilitySettings> {
    use crate::stability::{psi::PsiEdges, settings::MoveThreshold, ReviewPeriod, StabilitySettings};
    let mut s = StabilitySettings::default();
    if let Some(p) = &k.period {
        s.period = p.parse::<ReviewPeriod>().map_err(|e| bad(path, "stability.period", e))?;
    }
    if let Some(v) = k.move_threshold {
        s.default_move_threshold = MoveThreshold::Relative(v);
    }
    // Series and method names are checked here, before any data is read: a typo would
    // otherwise switch a test or a threshold off without a word.
    let series_check = |key: &str, names: Vec<&String>| -> Result<()> {
        match names.into_iter().find(|n| !crate::stability::settings::is_series_name(n)) {
            Some(n) => Err(bad(
                path,
                key,
                format!(
                    "{n:?} is not a series of the review (one of {}, or hazard_node_<tenor> such as hazard_node_5Y)",
                    crate::stability::settings::FIXED_SERIES.join(", ")
                ),
            )),
            None => Ok(()),
        }
    };
    if let Some(c) = &k.cusum_series {
        series_check("stability.cusum_series", c.iter().collect())?;
    }
    if let Some(m) = &k.move_thresholds {
        series_check("stability.move_thresholds", m.keys().collect())?;
    }
    if let Some(m) = &k.residual_flag_bp {
        if let Some(bad_method) = m.keys().find(|k| crate::text::FitMethod::parse(k).is_none()) {
            return Err(bad(
                path,
                "stability.residual_flag_bp",
                format!(
                    "{bad_method:?} is not a calibration method (one of {:?})",
                    <crate::text::FitMethod as crate::text::TextForm>::texts()
                ),
            ));
        }
    }
    if let Some(m) = &k.move_thresholds {
        s.move_thresholds = m.iter().map(|(k, v)| (k.clone(), MoveThreshold::Relative(*v))).collect();
    }
    let set = |slot: &mut f64, v: Option<f64>| {
        if let Some(v) = v {
            *slot = v;
        }
    };
    set(&mut s.large_move_share_max, k.large_move_share_max);
    set(&mut s.cv_max, k.cv_max);
    set(&mut s.change_max, k.change_max);
    set(&mut s.market_ratio_max, k.market_ratio_max);
    set(&mut s.param_move_min, k.param_move_min);
    set(&mut s.psi_amber, k.psi_amber);
    set(&mut s.psi_red, k.psi_red);
    set(&mut s.reprice_tolerance_bp, k.reprice_tolerance_bp);
    if let Some(e) = &k.psi_edges {
        if e.windows(2).any(|w| !(w[0] < w[1])) || e.iter().any(|x| !x.is_finite()) {
            return Err(bad(path, "stability.psi_edges", format!("{e:?} must be finite and strictly increasing")));
        }
        s.psi_edges = PsiEdges::Given(e.clone());
    }
    if let Some(n) = k.universe_min_entities {
        s.universe_min_entities = n;
    }
    if let Some(n) = k.psi_min_entities {
        s.psi_min_entities = n;
    }
    if let Some(c) = &k.cusum_series {
        s.cusum_series = c.clone();
    }
    if let Some(l) = k.cusum_level {
        s.cusum_level = l;
    }
    if let Some(t) = k.cusum_target {
        s.cusum_target = t;
    }
    if let Some(n) = k.cusum_min_obs {
        s.cusum_min_obs = n.max(3);
    }
    if let Some(m) = &k.residual_flag_bp {
        s.residual_flag_bp = m.iter().map(|(k, v)| (k.clone(), *v)).collect();
    }
    if let Some(n) = k.worst_n {
        s.worst_n = n;
    }
    s.check().map_err(|e| bad(path, "stability", e.to_string()))?;
    Ok(s)
}

fn ser_quality<S: serde::Serializer>(q: &QualitySettings, s: S) -> std::result::Result<S::Ok, S::Error> {
    use serde::ser::SerializeMap;
    let mut m = s.serialize_map(None)?;
    m.serialize_entry("max_spread_bp", &q.max_spread_bp)?;
    m.serialize_entry("min_spread_bp", &q.min_spread_bp)?;
    m.serialize_entry("zero_rate_band", &[q.zero_rate_band.0, q.zero_rate_band.1])?;
    m.serialize_entry("bond_price_band", &[q.bond_price_band.0, q.bond_price_band.1])?;
    m.serialize_entry("stale_days", &q.stale_days)?;
    m.serialize_entry("spike_z", &q.spike_z)?;
    m.serialize_entry("spike_min_log_move", &q.spike_min_log_move)?;
    m.serialize_entry("spike_revert_share", &q.spike_revert_share)?;
    m.serialize_entry("unit_slip_ratio", &q.unit_slip_ratio)?;
    m.serialize_entry("unit_slip_min_run", &q.unit_slip_min_run)?;
    m.serialize_entry("min_tenors", &q.min_tenors)?;
    m.end()
}

fn bad(path: &Path, key: &str, message: String) -> Error {
    Error::Config { path: path.to_path_buf(), message: format!("key `{key}`: {message}") }
}

/// Reads and checks a pipeline file.
pub fn load_pipeline(path: &Path) -> Result<RunConfig> {
    let text = read_text(path)?;
    let file: PipelineFile = toml::from_str(&text)
        .map_err(|e| Error::Config { path: path.to_path_buf(), message: e.to_string().trim_end().to_string() })?;
    check(file, path)
}

/// The pipeline file's text: a missing file, one that cannot be read (permissions, a link
/// loop) and one that is not UTF-8 (with the line of the first bad byte) get messages of
/// their own.
fn read_text(path: &Path) -> Result<String> {
    let bytes = std::fs::read(path).map_err(|e| match e.kind() {
        std::io::ErrorKind::NotFound => Error::NotFound { path: path.to_path_buf() },
        _ => Error::Read { path: path.to_path_buf(), format: "a pipeline file", message: e.to_string() },
    })?;
    String::from_utf8(bytes).map_err(|e| {
        let good = e.utf8_error().valid_up_to();
        let bytes = e.as_bytes();
        let line = bytes[..good].iter().filter(|b| **b == b'\n').count() + 1;
        Error::Read {
            path: path.to_path_buf(),
            format: "a pipeline file",
            message: format!("line {line}: byte {:#04x} is not UTF-8 text; save the file as UTF-8", bytes[good]),
        }
    })
}

/// Turns the file as written into a checked configuration.
pub fn check(file: PipelineFile, path: &Path) -> Result<RunConfig> {
    let base = path.parent().map(Path::to_path_buf).unwrap_or_default();
    let resolve = |p: &Option<PathBuf>, key: &str| -> Result<Option<PathBuf>> {
        match p {
            None => Ok(None),
            Some(p) => {
                let full = if p.is_absolute() { p.clone() } else { base.join(p) };
                if !full.exists() {
                    return Err(bad(
                        path,
                        key,
                        format!("input {} does not exist (resolved to {})", p.display(), full.display()),
                    ));
                }
                Ok(Some(full))
            }
        }
    };
    let i = &file.inputs;
    let inputs = InputPaths {
        cds_quotes: resolve(&i.cds_quotes, "inputs.cds_quotes")?,
        discount: resolve(&i.discount, "inputs.discount")?,
        rate_quotes: resolve(&i.rate_quotes, "inputs.rate_quotes")?,
        bonds: resolve(&i.bonds, "inputs.bonds")?,
        bond_quotes: resolve(&i.bond_quotes, "inputs.bond_quotes")?,
        entities: resolve(&i.entities, "inputs.entities")?,
        grades: resolve(&i.grades, "inputs.grades")?,
        defaults: resolve(&i.defaults, "inputs.defaults")?,
        cohort_history: resolve(&i.cohort_history, "inputs.cohort_history")?,
    };
    if inputs.cds_quotes.is_none() || (inputs.discount.is_none() && inputs.rate_quotes.is_none()) {
        return Err(bad(
            path,
            "inputs",
            "a pipeline needs at least inputs.cds_quotes and inputs.discount or inputs.rate_quotes".into(),
        ));
    }
    let mut as_written = BTreeMap::new();
    for (k, v) in [
        ("cds_quotes", &i.cds_quotes),
        ("discount", &i.discount),
        ("rate_quotes", &i.rate_quotes),
        ("bonds", &i.bonds),
        ("bond_quotes", &i.bond_quotes),
        ("entities", &i.entities),
        ("grades", &i.grades),
        ("defaults", &i.defaults),
        ("cohort_history", &i.cohort_history),
    ] {
        if let Some(p) = v {
            as_written.insert(k.to_string(), p.display().to_string());
        }
    }
    let holidays_path = resolve(&i.holidays, "inputs.holidays")?;
    let calendar = match &holidays_path {
        None => Calendar::weekends_only(),
        Some(p) => read_holidays(p).map_err(|m| bad(path, "inputs.holidays", m))?,
    };

    let c = &file.conventions;
    let recovery = c.recovery.unwrap_or(0.40);
    if !(0.0..1.0).contains(&recovery) {
        return Err(bad(path, "conventions.recovery", format!("{recovery} is not a fraction in [0, 1)")));
    }
    let by_sen = c.recovery_by_seniority.clone().unwrap_or_default();
    for (k, v) in &by_sen {
        if !(0.0..1.0).contains(v) {
            return Err(bad(
                path,
                &format!("conventions.recovery_by_seniority.{k}"),
                format!("{v} is not a fraction in [0, 1)"),
            ));
        }
    }
    let infeasible = c.infeasible.unwrap_or_default();
    let accrual_on_default = c.accrual_on_default.unwrap_or_default();
    let zero_rate_compounding = c.zero_rate_compounding.unwrap_or_default();
    let zero_rate_day_count = c.zero_rate_day_count.unwrap_or_default();
    // Currency keys are written as the data writes currencies (three capital letters): a
    // key like `eur` would silently match nothing.
    let currency_key = |section: &str, ccy: &str| -> Result<()> {
        if ccy.len() == 3 && ccy.chars().all(|c| c.is_ascii_uppercase()) {
            Ok(())
        } else {
            Err(bad(
                path,
                &format!("{section}.{ccy}"),
                format!("{ccy:?} is not a currency code of three capital letters"),
            ))
        }
    };
    let mut standard_coupons = BTreeMap::new();
    for (ccy, v) in c.standard_coupon_bp.clone().unwrap_or_default() {
        currency_key("conventions.standard_coupon_bp", &ccy)?;
        if !(v > 0.0 && v < 1e4) {
            return Err(bad(
                path,
                &format!("conventions.standard_coupon_bp.{ccy}"),
                format!("{v} is not a running coupon in bp between 0 and 10,000"),
            ));
        }
        standard_coupons.insert(ccy, v);
    }
    use crate::calibrate::sensitivity::SensitivityDates;
    let sensitivity_dates = match &file.calibration.sensitivity_dates {
        None => SensitivityDates::MonthEnds,
        Some(SensitivityDatesSetting::Word(w)) if w == "month_ends" => SensitivityDates::MonthEnds,
        Some(SensitivityDatesSetting::Word(w)) if w == "off" => SensitivityDates::Off,
        Some(SensitivityDatesSetting::Word(w)) => {
            return Err(bad(
                path,
                "calibration.sensitivity_dates",
                format!("{w:?} is not \"month_ends\", \"off\" or a list of ISO dates"),
            ))
        }
        Some(SensitivityDatesSetting::Dates(list)) => {
            let mut set = std::collections::BTreeSet::new();
            for d in list {
                set.insert(crate::time::parse_iso_date(d).ok_or_else(|| {
                    bad(path, "calibration.sensitivity_dates", format!("{d:?} is not an ISO date yyyy-mm-dd"))
                })?);
            }
            SensitivityDates::Dates(set)
        }
    };
    let mut currency_calendars = BTreeMap::new();
    for (ccy, p) in &file.calendars {
        currency_key("calendars", ccy)?;
        let key = format!("calendars.{ccy}");
        let full = resolve(&Some(p.clone()), &key)?.ok_or_else(|| bad(path, &key, "no file given".into()))?;
        currency_calendars.insert(ccy.clone(), read_holidays(&full).map_err(|m| bad(path, &key, m))?);
    }
    let mut rate_conventions = BTreeMap::new();
    for (ccy, r) in &file.rate_conventions {
        currency_key("rate_conventions", ccy)?;
        let key = |k: &str| format!("rate_conventions.{ccy}.{k}");
        let dc = |k: &str, text: &str| -> Result<crate::time::DayCount> {
            match text.parse::<crate::time::DayCount>() {
                Ok(crate::time::DayCount::ActActIcma) | Err(_) => {
                    Err(bad(path, &key(k), format!("{text:?} is not ACT/360, ACT/365F or 30/360")))
                }
                Ok(d) => Ok(d),
            }
        };
        if ![1, 3, 6, 12].contains(&r.fixed_months) {
            return Err(bad(path, &key("fixed_months"), format!("{} is not 1, 3, 6 or 12", r.fixed_months)));
        }
        if !(1..=12).contains(&r.float_months) {
            return Err(bad(
                path,
                &key("float_months"),
                format!("{} is not a tenor of 1 to 12 months", r.float_months),
            ));
        }
        if r.spot_lag > 5 {
            return Err(bad(path, &key("spot_lag"), format!("{} business days is not a spot lag", r.spot_lag)));
        }
        rate_conventions.insert(
            ccy.clone(),
            crate::curves::rates::RateConvention {
                spot_lag: r.spot_lag,
                deposit_day_count: dc("deposit_day_count", &r.deposit_day_count)?,
                fixed_months: r.fixed_months,
                fixed_day_count: dc("fixed_day_count", &r.fixed_day_count)?,
                float_months: r.float_months,
            },
        );
    }

    let k = &file.calibration;
    let cds_bootstrap = k.cds_bootstrap.unwrap_or(true);
    let have_bonds = inputs.bonds.is_some() && inputs.bond_quotes.is_some();
    let bond_fit = k.bond_fit.unwrap_or(have_bonds);
    if bond_fit && !have_bonds {
        return Err(bad(path, "calibration.bond_fit", "the bond fit needs inputs.bonds and inputs.bond_quotes".into()));
    }
    let cir = k.cir.unwrap_or(false);
    if cir && !cds_bootstrap {
        return Err(bad(
            path,
            "calibration.cir",
            "the CIR fit starts from the bootstrapped curves and needs cds_bootstrap = true".into(),
        ));
    }
    let cir_mode = k.cir_mode.unwrap_or(CirFitMode::Free);
    let cir_window = k.cir_window.unwrap_or(20);
    if cir_window < 2 {
        return Err(bad(
            path,
            "calibration.cir_window",
            format!("{cir_window} is not a window of at least 2 business days"),
        ));
    }
    let bond_recovery_convention = k.bond_recovery_convention.unwrap_or_default();
    let intensity = IntensitySettings {
        bond_fit,
        cir,
        cir_mode,
        cir_window,
        bond_convention: bond_recovery_convention,
        cir_entities: k.cir_entities.clone(),
    };

    let q = &file.quality;
    let d = QualitySettings::default();
    let band = |v: Option<[f64; 2]>, key: &str, dflt: (f64, f64)| -> Result<(f64, f64)> {
        match v {
            None => Ok(dflt),
            Some([a, b]) if a < b => Ok((a, b)),
            Some([a, b]) => Err(bad(path, key, format!("[{a}, {b}] is not an increasing pair"))),
        }
    };
    let positive = |v: Option<f64>, key: &str, dflt: f64| -> Result<f64> {
        match v {
            None => Ok(dflt),
            Some(x) if x > 0.0 && x.is_finite() => Ok(x),
            Some(x) => Err(bad(path, key, format!("{x} is not a positive number"))),
        }
    };
    let quality = QualitySettings {
        max_spread_bp: positive(q.max_spread_bp, "quality.max_spread_bp", d.max_spread_bp)?,
        min_spread_bp: positive(q.min_spread_bp, "quality.min_spread_bp", d.min_spread_bp)?,
        zero_rate_band: band(q.zero_rate_band, "quality.zero_rate_band", d.zero_rate_band)?,
        bond_price_band: band(q.bond_price_band, "quality.bond_price_band", d.bond_price_band)?,
        stale_days: q.stale_days.unwrap_or(d.stale_days).max(1),
        spike_z: positive(q.spike_z, "quality.spike_z", d.spike_z)?,
        spike_min_log_move: positive(q.spike_min_log_move, "quality.spike_min_log_move", d.spike_min_log_move)?,
        spike_revert_share: positive(q.spike_revert_share, "quality.spike_revert_share", d.spike_revert_share)?,
        unit_slip_ratio: positive(q.unit_slip_ratio, "quality.unit_slip_ratio", d.unit_slip_ratio)?,
        unit_slip_min_run: q.unit_slip_min_run.unwrap_or(d.unit_slip_min_run).max(1),
        min_tenors: q.min_tenors.unwrap_or(d.min_tenors),
    };
    if quality.min_spread_bp >= quality.max_spread_bp {
        return Err(bad(
            path,
            "quality.min_spread_bp",
            format!(
                "the spread floor {} bp is not below the cap quality.max_spread_bp = {} bp",
                quality.min_spread_bp, quality.max_spread_bp
            ),
        ));
    }

    let r = &file.report;
    let output_root = match &r.output_root {
        Some(p) if p.is_absolute() => p.clone(),
        Some(p) => normalise(&base.join(p)),
        None => match base.parent() {
            Some(p) => p.join("validation-reports"),
            None => base.join("..").join("validation-reports"),
        },
    };
    let term_structure_dates = match &r.term_structure_dates {
        None => None,
        Some(v) => Some(
            v.iter()
                .map(|s| {
                    parse_iso_date(s).ok_or_else(|| {
                        bad(path, "report.term_structure_dates", format!("{s:?} is not an ISO date yyyy-mm-dd"))
                    })
                })
                .collect::<Result<Vec<_>>>()?,
        ),
    };
    if let Some(l) = &r.label {
        check_folder_name(l).map_err(|m| bad(path, "report.label", m))?;
    }
    let stability = stability_settings(&file.stability, path)?;
    let backtest = backtest_stage(&file.backtest, &inputs, path)?;
    let name = file
        .name
        .clone()
        .or_else(|| path.file_stem().and_then(|s| s.to_str()).map(str::to_string))
        .unwrap_or_else(|| "pipeline".into());
    check_folder_name(&name).map_err(|m| {
        let key = if file.name.is_some() {
            "name"
        } else {
            "name (the pipeline file's own name, used when `name` is not set)"
        };
        bad(path, key, m)
    })?;
    Ok(RunConfig {
        name,
        pipeline_path: path.to_path_buf(),
        inputs,
        inputs_as_written: as_written,
        holidays: i.holidays.as_ref().map(|p| p.display().to_string()),
        calendar,
        recovery,
        recovery_by_seniority: by_sen,
        seniority_order: c.seniority_order.clone().unwrap_or_default(),
        standard_coupons,
        sensitivity_dates,
        quote_conversions: file.calibration.quote_conversions.unwrap_or(true),
        infeasible,
        accrual_on_default,
        zero_rate_compounding,
        zero_rate_day_count,
        rate_conventions,
        calendars: file.calendars.iter().map(|(k, v)| (k.clone(), v.display().to_string())).collect(),
        currency_calendars,
        cds_bootstrap,
        bootstrap: BootstrapSettings { infeasible, accrual: accrual_on_default, ..BootstrapSettings::default() },
        bond_fit,
        cir,
        cir_mode,
        cir_window,
        cir_entities: k.cir_entities.clone(),
        bond_recovery_convention,
        intensity,
        quality,
        output_root,
        label: r.label.clone(),
        charted_entities: r.charted_entities.clone(),
        term_structure_dates,
        fail_on_red_flags: r.fail_on_red_flags.unwrap_or(false),
        large_tables: r.large_tables.unwrap_or_default(),
        backtest_settings: backtest.pairs(),
        backtest,
        stability_settings: stability.pairs(),
        stability,
    })
}

/// Reads a holiday list: one ISO date per line; blank lines, `#` comments and a `date` header
/// are skipped.
pub fn read_holidays(path: &Path) -> std::result::Result<Calendar, String> {
    let text = std::fs::read_to_string(path).map_err(|e| format!("{}: {e}", path.display()))?;
    let mut days = Vec::new();
    for (i, line) in text.lines().enumerate() {
        let t = line.trim();
        if t.is_empty() || t.starts_with('#') || t.eq_ignore_ascii_case("date") {
            continue;
        }
        let d = parse_iso_date(t)
            .ok_or_else(|| format!("{} line {}: {t:?} is not an ISO date yyyy-mm-dd", path.display(), i + 1))?;
        days.push(d);
    }
    Ok(Calendar::with_holidays(days))
}

/// Removes `dir/..` pairs lexically, so printed paths read `validation-reports/...` rather
/// than `pipelines/../validation-reports/...`.
fn normalise(p: &Path) -> PathBuf {
    let mut out: Vec<std::path::Component> = Vec::new();
    for c in p.components() {
        match c {
            std::path::Component::ParentDir if matches!(out.last(), Some(std::path::Component::Normal(_))) => {
                out.pop();
            }
            std::path::Component::CurDir => {}
            other => out.push(other),
        }
    }
    out.iter().collect()
}

#[cfg(test)]
mod backtest_settings_tests {
    use super::*;

    /// The commented example pipeline loads, with the backtest settings it documents; a fixed
    /// correlation and an outcome end parse, a correlation outside [0, 1) is refused.
    #[test]
    fn example_pipeline_and_backtest_settings_parse() {
        let path = Path::new(concat!(env!("CARGO_MANIFEST_DIR"), "/pipelines/quarterly-review.toml"));
        let cfg = load_pipeline(path).unwrap();
        assert_eq!(cfg.backtest.core.correlation, crate::backtest::AssetCorrelation::Supervisory);
        assert_eq!(cfg.backtest.core.outcome_end, None);
        let parse = |text: &str| -> PipelineFile { toml::from_str(text).unwrap() };
        let f = parse("[backtest]\nasset_correlation = 0.12\noutcome_end = \"2019-12-31\"\n");
        let s = backtest_stage(&f.backtest, &InputPaths::default(), Path::new("x.toml")).unwrap();
        assert_eq!(s.core.correlation, crate::backtest::AssetCorrelation::Fixed(0.12));
        assert_eq!(s.core.outcome_end, NaiveDate::from_ymd_opt(2019, 12, 31));
        let f = parse("[backtest]\nasset_correlation = 1.5\n");
        let err = backtest_stage(&f.backtest, &InputPaths::default(), Path::new("x.toml")).unwrap_err();
        assert!(err.to_string().contains("asset correlation 1.5"), "{err}");
        assert!(toml::from_str::<PipelineFile>("[backtest]\nasset_correlation = \"high\"\n").is_err());
    }
}
