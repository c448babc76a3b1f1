//! Stability of calibrated parameters through time, and calibration residuals across many
//! calibrations (docs/design.md, "Stability review").
//!
//! Reads plain structs the pipeline fills from its tables: parameter observations per
//! (series, entity, date) with the entity's grade ([`Observation`], e.g. `pd_1y`, `hazard_5y`,
//! `cir_kappa`), the entity's market-quote moves ([`MarketMove`]), calibration status counts
//! ([`CalibrationCounts`]) and repriced quotes ([`ResidualObservation`]). Produces the rows of
//! the `stability` table ([`StabilityRow`]), per-date cross-sectional bands
//! ([`CrossSectionRow`]), PSI rows ([`PsiRow`]), CUSUM break tests ([`BreakRow`]), residual
//! summaries ([`ResidualAnalysis`]) and the `flags` table ([`FlagRow`]).
//!
//! Invariants: no I/O, no polars, no clock, no logging; no panic on any input (bad settings
//! are an error, bad values are dropped and counted); output order is deterministic.

pub mod breaks;
pub mod cusum;
pub mod flags;
pub mod inputs;
pub mod metrics;
pub mod period;
pub mod population;
pub mod psi;
pub mod residual_review;
pub mod settings;
pub mod summary;

pub use breaks::{BreakRow, BreakStatus};
pub use cusum::{CusumLevel, CusumScope, CusumTarget};
pub use flags::FlagRow;
pub use inputs::{
    spread_move, spread_move_sorted, CalibrationCounts, InputSummary, MarketMove, Observation, PanelBuilder, SpreadEdge,
};
pub use metrics::{CrossSectionRow, Scope, StabilityRow, CALIBRATION_SERIES};
pub use period::{Period, ReviewPeriod};
pub use population::PsiRow;
pub use psi::PsiEdges;
pub use residual_review::{review_residuals, ResidualAnalysis, ResidualObservation, ResidualReview};
pub use settings::{MoveThreshold, StabilitySettings};

/// Why a stability computation cannot run.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum StabilityError {
    /// A setting is out of range; names the setting, its value and what is expected.
    #[error("stability setting {name} = {value} is not valid: expected {expected}")]
    Setting { name: String, value: String, expected: &'static str },
    /// A sample that must hold values is empty.
    #[error("{what} is empty")]
    EmptySample { what: &'static str },
    /// A value is NaN or infinite.
    #[error("{what} holds a value that is not a finite number")]
    NonFinite { what: &'static str },
    /// Too few values for a test.
    #[error("series of {n} values is too short for the test (needs {needed})")]
    TooShort { n: usize, needed: usize },
    /// A constant series: no variance, so no test.
    #[error("series is constant: no variance to test")]
    ZeroVariance,
}

/// The parameter-series part of the stage's output.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct SeriesAnalysis {
    /// The `stability` table: entity, grade and universe rows, ordered by period, then series,
    /// scope and key.
    pub rows: Vec<StabilityRow>,
    /// Per-date 10/50/90% bands (universe and per grade).
    pub cross_section: Vec<CrossSectionRow>,
    /// PSI between consecutive periods of each `psi_series`.
    pub psi: Vec<PsiRow>,
    /// One CUSUM test per (series, entity, window).
    pub breaks: Vec<BreakRow>,
    /// What happened to the inputs on entry.
    pub input: InputSummary,
}

/// Summarises the parameter series. Errors only on invalid settings.
pub fn analyse_series(
    observations: &[Observation],
    market: &[MarketMove],
    counts: &[CalibrationCounts],
    settings: &StabilitySettings,
) -> Result<SeriesAnalysis, StabilityError> {
    settings.check()?;
    analyse_panel(inputs::build_panel(observations), market, counts, settings)
}

fn analyse_panel(
    (panel, mut input): (inputs::Panel, InputSummary),
    market: &[MarketMove],
    counts: &[CalibrationCounts],
    settings: &StabilitySettings,
) -> Result<SeriesAnalysis, StabilityError> {
    settings.check()?;
    let (market_rel, unusable) = inputs::market_by_period(market, settings);
    input.market_unusable = unusable;
    let counts = inputs::counts_by_period(counts, settings);
    let ctx = metrics::EntityContext { market: &market_rel, counts: &counts, settings };
    let means = metrics::entity_means(&panel, settings);
    // The rows, the cross-sections, the PSI and the breaks are independent of one another:
    // worked out side by side on rayon's threads.
    let (rows, (cross_section, (psi, breaks))) = rayon::join(
        || {
            let mut rows = metrics::entity_rows(&panel, &ctx);
            rows.extend(metrics::calibration_rows(&counts));
            rows.extend(metrics::group_rows(&means));
            metrics::fill_changes(&mut rows);
            // Stable, on rayon's threads (rows of equal keys keep their order, as `sort_by`
            // keeps it).
            use rayon::slice::ParallelSliceMut;
            rows.par_sort_by(|(pa, a), (pb, b)| {
                (pa, &a.series, a.scope, &a.key).cmp(&(pb, &b.series, b.scope, &b.key))
            });
            rows
        },
        || {
            rayon::join(
                || metrics::cross_sections(&panel, settings),
                || rayon::join(|| population::psi_rows(&means, settings), || breaks::break_rows(&panel, settings)),
            )
        },
    );
    Ok(SeriesAnalysis { rows: rows.into_iter().map(|(_, r)| r).collect(), cross_section, psi, breaks, input })
}

/// Everything the stability stage produces.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct StabilityOutput {
    /// Parameter-series results.
    pub series: SeriesAnalysis,
    /// Residual results.
    pub residuals: ResidualAnalysis,
    /// Every breach, red first (see [`flags::sort_flags`]).
    pub flags: Vec<FlagRow>,
}

impl StabilityOutput {
    /// Whether `flag` points at data in this output: for a residual flag, a curve row with its
    /// entity, method and date; otherwise a stability row with its series and period (and its
    /// entity as the key, when it names one).
    pub fn flag_has_target(&self, flag: &FlagRow) -> bool {
        if let Some(method) = flag.series.strip_prefix("residual_bp/") {
            return self.residuals.curves.iter().any(|c| {
                Some(&*c.entity) == flag.entity.as_deref() && &*c.method == method && Some(c.date) == flag.date
            });
        }
        self.series.rows.iter().any(|r| {
            let key_ok = match &flag.entity {
                Some(e) => r.scope == Scope::Entity && &r.key == e,
                None => r.scope == Scope::Universe,
            };
            key_ok && r.series == flag.series && r.period == flag.period
        })
    }
}

/// Runs the whole stage: series summaries, residual review, and every flag.
pub fn analyse(
    observations: &[Observation],
    market: &[MarketMove],
    counts: &[CalibrationCounts],
    residuals: &[ResidualObservation],
    settings: &StabilitySettings,
) -> Result<StabilityOutput, StabilityError> {
    settings.check()?;
    let mut panel = PanelBuilder::new();
    for o in observations {
        panel.push_observation(o);
    }
    analyse_gathered(panel, market, counts, review_residuals(residuals, settings), settings)
}

/// [`analyse`] on observations gathered as they were produced ([`PanelBuilder`]) and residuals
/// already reviewed (by a [`ResidualReview`] the rows went through as they passed).
pub fn analyse_gathered(
    observations: PanelBuilder,
    market: &[MarketMove],
    counts: &[CalibrationCounts],
    residuals: ResidualAnalysis,
    settings: &StabilitySettings,
) -> Result<StabilityOutput, StabilityError> {
    let series = analyse_panel(observations.finish(), market, counts, settings)?;
    let mut all = flags::row_flags(&series.rows, settings);
    all.extend(flags::psi_flags(&series.psi, settings));
    all.extend(flags::break_flags(&series.breaks, settings));
    all.extend(flags::residual_flags(&residuals.curves, settings));
    flags::sort_flags(&mut all);
    Ok(StabilityOutput { series, residuals, flags: all })
}
