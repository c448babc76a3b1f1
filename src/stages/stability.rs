//! The stability stage of a run: turns the calibrated curves, the CIR fits and the residuals
//! into the plain inputs of [`crate::stability`], and writes its tables.

use crate::stages::calibrate::CdsCurve;
use crate::error::Result;
use crate::ingest::Dataset;
use crate::tables::parquet::{write_parquet, TableBuilder};
use crate::tables::records::{HazardCurveRow, IntensityParamRow, ResidualRow};
use crate::backtest::GradeBook;
use crate::stability::{self, spread_move, SpreadEdge, CalibrationCounts, FlagRow, MarketMove, PanelBuilder, ResidualAnalysis, ResidualObservation, ResidualReview, StabilityOutput, StabilitySettings};
use chrono::NaiveDate;
use std::collections::{BTreeMap, BTreeSet};
use std::path::Path;
use std::sync::Arc;

/// The grade book of the dataset's grades table (see [`GradeBook`]).
pub fn grade_book(ds: &Dataset) -> GradeBook {
    GradeBook::new(ds.grades.iter().flat_map(|g| g.rows.iter().map(|(r, _)| (r.entity.clone(), r.from_date, r.grade))))
}

/// Entities quoted in more than one currency in the CDS panel's usable rows: their series
/// are kept as `entity/CCY`. Known before any curve is calibrated, so every series can be
/// named as its rows stream past; a property of each entity alone, so the union over entity
/// shards is the whole run's.
pub fn multi_currency(panel: &crate::ingest::cds::CdsPanel) -> BTreeSet<String> {
    let mut first: std::collections::HashMap<u32, u32> = std::collections::HashMap::new();
    let mut multi: BTreeSet<String> = BTreeSet::new();
    for r in &panel.rows {
        let c = *first.entry(r.entity).or_insert(r.currency);
        if c != r.currency {
            multi.insert(panel.entities.name(r.entity).to_string());
        }
    }
    multi
}

fn series_name(multi: &BTreeSet<String>, e: &str, c: &str) -> String {
    if multi.contains(e) {
        format!("{e}/{c}")
    } else {
        e.to_string()
    }
}

/// Shared labels for the stability inputs: one allocation per distinct series name, entity
/// series (`entity` or `entity/CCY`) and text value, however many rows repeat it.
#[derive(Default)]
struct Labels {
    seen: std::collections::HashMap<String, Arc<str>>,
    entities: std::collections::HashMap<String, std::collections::HashMap<String, Arc<str>>>,
    /// The (entity, currency) labels last asked for and their answer.
    last: Option<(Arc<str>, Arc<str>, Arc<str>)>,
}

impl Labels {
    fn get(&mut self, v: &str) -> Arc<str> {
        if let Some(l) = self.seen.get(v) {
            return l.clone();
        }
        let l: Arc<str> = v.into();
        self.seen.insert(v.to_string(), l.clone());
        l
    }

    /// The series entity of (entity, currency): `entity`, or `entity/CCY` when it is quoted in
    /// several currencies.
    /// [`Labels::entity`] for a row's shared labels, with the previous row's answer reused
    /// when the row shares its labels (the rows of one curve do).
    fn entity_of(&mut self, multi: &BTreeSet<String>, e: &Arc<str>, c: &Arc<str>) -> Arc<str> {
        if let Some((le, lc, l)) = &self.last {
            if Arc::ptr_eq(le, e) && Arc::ptr_eq(lc, c) {
                return l.clone();
            }
        }
        let l = self.entity(multi, e, c);
        self.last = Some((e.clone(), c.clone(), l.clone()));
        l
    }

    fn entity(&mut self, multi: &BTreeSet<String>, e: &str, c: &str) -> Arc<str> {
        let c = if multi.contains(e) { c } else { "" };
        if let Some(l) = self.entities.get(e).and_then(|m| m.get(c)) {
            return l.clone();
        }
        let l: Arc<str> = series_name(multi, e, c).into();
        self.entities.entry(e.to_string()).or_default().insert(c.to_string(), l.clone());
        l
    }
}

/// Everything the stability core reads, built from a run's calibration.
pub struct StabilityInputs {
    pub observations: PanelBuilder,
    pub market: Vec<MarketMove>,
    pub counts: Vec<CalibrationCounts>,
    pub residuals: ResidualAnalysis,
}

/// The series that need the curves themselves, per CDS curve: the 1Y implied PD, the 5Y
/// hazard and each node's hazard; and per entity and date the mean absolute daily change of
/// its par spreads. Each depends on one entity's curves alone. Curves are added in key order
/// (date, entity, currency), as calibration hands them over, and need not be kept after.
pub struct CurveSeries<'a> {
    grades: &'a GradeBook,
    multi: &'a BTreeSet<String>,
    labels: Labels,
    pd_1y: Arc<str>,
    hazard_5y: Arc<str>,
    node_labels: crate::hash::FastMap<crate::time::Tenor, Arc<str>>,
    /// Per series entity, the date and par spreads of its latest curve so far.
    last_spreads: crate::hash::FastMap<Arc<str>, (NaiveDate, BTreeMap<u32, f64>)>,
    observations: PanelBuilder,
    market: Vec<MarketMove>,
    /// Each series entity's first curve's spreads (see [`SpreadEdge`]).
    firsts: Vec<SpreadEdge>,
}

impl<'a> CurveSeries<'a> {
    pub fn new(grades: &'a GradeBook, multi: &'a BTreeSet<String>) -> Self {
        let mut labels = Labels::default();
        let (pd_1y, hazard_5y) = (labels.get("pd_1y"), labels.get("hazard_5y"));
        CurveSeries { grades, multi, labels, pd_1y, hazard_5y, node_labels: Default::default(), last_spreads: Default::default(), observations: PanelBuilder::new(), market: Vec::new(), firsts: Vec::new() }
    }

    /// Takes the series of the curve of (`date`, `e`, `c`).
    pub fn add(&mut self, date: NaiveDate, e: &str, c: &str, curve: &CdsCurve) {
        let entity = self.labels.entity(self.multi, e, c);
        let grade = self.grades.grade(e, date);
        if let Some(h) = &curve.curve {
            let observations = &mut self.observations;
            let mut push = |series: &Arc<str>, value: f64| {
                if value.is_finite() {
                    observations.push(series, &entity, grade, date, value);
                }
            };
            push(&self.pd_1y, 1.0 - h.survival_at(1.0));
            push(&self.hazard_5y, h.hazard_at(5.0));
            if h.hazards().len() == curve.quotes.len() {
                for (q, &x) in curve.quotes.iter().zip(h.hazards()) {
                    push(self.node_labels.entry(q.tenor).or_insert_with(|| format!("hazard_node_{}", q.tenor).into()), x);
                }
            }
        }
        let spreads: BTreeMap<u32, f64> = crate::stages::backtest::spreads_of(&curve.quotes).into_iter().map(|q| (q.tenor_months, q.spread_bp)).collect();
        match self.last_spreads.get(&entity) {
            Some((_, prev)) => self.market.extend(spread_move(&entity, date, prev, &spreads)),
            None => self.firsts.push(SpreadEdge { entity: entity.clone(), date, last: false, spreads: spreads.clone() }),
        }
        self.last_spreads.insert(entity, (date, spreads));
    }

    /// The curve observations, the market moves, and each series entity's first and last
    /// curve's spreads (firsts in arrival order, then lasts by entity).
    pub fn finish(self) -> (PanelBuilder, Vec<MarketMove>, Vec<SpreadEdge>) {
        let mut edges = self.firsts;
        let mut lasts: Vec<SpreadEdge> = self.last_spreads.into_iter().map(|(entity, (date, spreads))| SpreadEdge { entity, date, last: true, spreads }).collect();
        lasts.sort_by(|a, b| a.entity.cmp(&b.entity));
        edges.extend(lasts);
        (self.observations, self.market, edges)
    }
}

/// What the stability stage takes from the node and residual rows, digested as the rows pass
/// in the tables' order: per CDS curve its failures and infeasible nodes (from the node
/// statuses), and the residual review ([`ResidualReview`]) of every repricing residual.
/// One curve's (date, failures, infeasible nodes).
type CurveCount = (NaiveDate, u64, u64);

pub struct RowDigest<'a> {
    labels: Labels,
    multi: &'a BTreeSet<String>,
    /// Per series entity (by the label's address: `labels` hands out one label per text and
    /// holds it), its curves' (date, failures, infeasible) in arrival order.
    counts: crate::hash::FastMap<usize, (Arc<str>, Vec<CurveCount>)>,
    /// Labels of the rows' fixed texts (method, instrument), by the text's address and length.
    fixed: crate::hash::FastMap<(usize, usize), Arc<str>>,
    /// The curve whose consecutive nodes are being counted.
    run: Option<(Arc<str>, CurveCount)>,
    review: ResidualReview,
}

impl<'a> RowDigest<'a> {
    pub fn new(multi: &'a BTreeSet<String>, settings: &StabilitySettings) -> Self {
        RowDigest { labels: Labels::default(), multi, counts: Default::default(), fixed: Default::default(), run: None, review: ResidualReview::new(settings) }
    }

    /// Counts the statuses of CDS node rows. A curve's nodes are consecutive rows: they are
    /// counted together and recorded once per curve (a curve met again later is merged with
    /// what it had at [`RowDigest::finish`]).
    pub fn nodes(&mut self, hazard: &[HazardCurveRow]) {
        for r in hazard.iter().filter(|r| r.source == "cds") {
            let entity = self.labels.entity_of(self.multi, &r.entity, &r.currency);
            let same = self.run.as_ref().is_some_and(|(e, (d, _, _))| *d == r.date && Arc::ptr_eq(e, &entity));
            if !same {
                self.end_run();
                self.run = Some((entity, (r.date, 0, 0)));
            }
            if let Some((_, (_, failures, infeasible))) = self.run.as_mut() {
                match r.status {
                    "ok" => {}
                    "floored" | "infeasible" => *infeasible += 1,
                    _ => *failures = 1,
                }
            }
        }
    }

    fn end_run(&mut self) {
        if let Some((entity, count)) = self.run.take() {
            let address = Arc::as_ptr(&entity) as *const u8 as usize;
            self.counts.entry(address).or_insert_with(|| (entity, Vec::new())).1.push(count);
        }
    }

    /// Reviews repricing residuals.
    pub fn residuals(&mut self, residuals: &[ResidualRow]) {
        for r in residuals {
            let (labels, fixed) = (&mut self.labels, &mut self.fixed);
            let mut get = |v: &'static str| fixed.entry((v.as_ptr() as usize, v.len())).or_insert_with(|| labels.get(v)).clone();
            let (method, instrument) = (get(r.method), get(r.instrument));
            let o = ResidualObservation {
                date: r.date,
                entity: self.labels.entity_of(self.multi, &r.entity, &r.currency),
                method,
                instrument,
                tenor: r.tenor_or_bond.clone(),
                market: r.market,
                model: r.model,
                residual_bp: r.residual_bp,
                converged: r.status == "ok",
            };
            self.review.add(&o);
        }
    }

    /// The counts per curve, in (series entity, date) order (a curve met more than once: the
    /// failure flag of any, the infeasible nodes of all), and the residual review.
    pub fn finish(mut self) -> (Vec<CalibrationCounts>, ResidualAnalysis) {
        self.end_run();
        let mut entities: Vec<(Arc<str>, Vec<CurveCount>)> = self.counts.into_values().collect();
        entities.sort_by(|a, b| a.0.cmp(&b.0));
        let mut counts = Vec::with_capacity(entities.iter().map(|(_, v)| v.len()).sum());
        for (entity, mut curves) in entities {
            curves.sort_by_key(|c| c.0);
            let start = counts.len();
            for (date, failures, infeasible) in curves {
                match counts[start..].last_mut() {
                    Some(CalibrationCounts { date: d, failures: f, infeasible: i, .. }) if *d == date => {
                        *f = (*f).max(failures);
                        *i += infeasible;
                    }
                    _ => counts.push(CalibrationCounts { entity: entity.clone(), date, failures, infeasible }),
                }
            }
        }
        (counts, self.review.finish())
    }
}

/// Builds the stability core's inputs from the curve series ([`CurveSeries`]; over partitions,
/// appended in shard order), the CIR fits (four parameters each, after the curve series) and
/// the digest of the node and residual rows.
pub fn stability_inputs(mut observations: PanelBuilder, mut market: Vec<MarketMove>, params: &[IntensityParamRow], grades: &GradeBook, multi: &BTreeSet<String>, digest: RowDigest) -> StabilityInputs {
    market.sort_by(|a, b| (a.date, &a.entity).cmp(&(b.date, &b.entity)));
    let mut labels = Labels::default();
    for p in params {
        let entity = labels.entity(multi, &p.entity, &p.currency);
        let grade = grades.grade(&p.entity, p.date);
        for (series, v) in [("cir_kappa", p.kappa), ("cir_theta", p.theta), ("cir_sigma", p.sigma), ("cir_lambda0", p.lambda0)] {
            if let Some(v) = v.filter(|v| v.is_finite()) {
                observations.push(&labels.get(series), &entity, grade, p.date, v);
            }
        }
    }
    let (counts, residuals) = digest.finish();
    StabilityInputs { observations, market, counts, residuals }
}

/// Runs the stability core.
pub fn run_stability(inputs: StabilityInputs, settings: &StabilitySettings) -> Result<StabilityOutput> {
    stability::analyse_gathered(inputs.observations, &inputs.market, &inputs.counts, inputs.residuals, settings).map_err(|e| crate::error::Error::Other(format!("stability stage: {e}")))
}

/// Writes `stability`, `stability_bands`, `stability_psi`, `stability_breaks`,
/// `residual_curves`, `residual_tenors`, `residual_worst` and `residual_repricing`.
pub fn write_stability_tables(out: &StabilityOutput, tables: &Path, meta: &[(String, String)]) -> Result<()> {
    let rows = &out.series.rows;
    let u = |v: Option<usize>| v.map(|x| x as i64);
    let mut df = TableBuilder::new()
        .strings("period", rows.iter().map(|r| Some(&r.period)))
        .strings("series", rows.iter().map(|r| Some(&r.series)))
        .strings("scope", rows.iter().map(|r| Some(r.scope.as_str())))
        .strings("key", rows.iter().map(|r| Some(&r.key)))
        .ints("n", rows.iter().map(|r| Some(r.n as i64)))
        .floats("mean", rows.iter().map(|r| r.mean))
        .floats("sd", rows.iter().map(|r| r.sd))
        .floats("cv", rows.iter().map(|r| r.cv))
        .floats("median", rows.iter().map(|r| r.median))
        .floats("p10", rows.iter().map(|r| r.p10))
        .floats("p90", rows.iter().map(|r| r.p90))
        .ints("moves", rows.iter().map(|r| u(r.moves)))
        .floats("max_abs_move", rows.iter().map(|r| r.max_abs_move))
        .dates("max_move_date", rows.iter().map(|r| r.max_move_date))
        .floats("large_move_share", rows.iter().map(|r| r.large_move_share))
        .floats("param_rel_move", rows.iter().map(|r| r.param_rel_move))
        .floats("market_rel_move", rows.iter().map(|r| r.market_rel_move))
        .floats("move_ratio", rows.iter().map(|r| r.move_ratio))
        .ints("failures", rows.iter().map(|r| r.failures.map(|x| x as i64)))
        .ints("infeasible", rows.iter().map(|r| r.infeasible.map(|x| x as i64)))
        .floats("mean_change", rows.iter().map(|r| r.mean_change))
        .floats("median_change", rows.iter().map(|r| r.median_change))
        .finish()?;
    write_parquet(&mut df, &tables.join("stability.parquet"), meta)?;

    let b = &out.series.cross_section;
    let mut df = TableBuilder::new()
        .dates("date", b.iter().map(|r| Some(r.date)))
        .strings("period", b.iter().map(|r| Some(&r.period)))
        .strings("series", b.iter().map(|r| Some(&r.series)))
        .strings("scope", b.iter().map(|r| Some(r.scope.as_str())))
        .strings("key", b.iter().map(|r| Some(&r.key)))
        .ints("n", b.iter().map(|r| Some(r.n as i64)))
        .floats("p10", b.iter().map(|r| Some(r.p10)))
        .floats("p50", b.iter().map(|r| Some(r.p50)))
        .floats("p90", b.iter().map(|r| Some(r.p90)))
        .finish()?;
    write_parquet(&mut df, &tables.join("stability_bands.parquet"), meta)?;

    let p = &out.series.psi;
    let mut df = TableBuilder::new()
        .strings("series", p.iter().map(|r| Some(&r.series)))
        .strings("period", p.iter().map(|r| Some(&r.period)))
        .strings("previous_period", p.iter().map(|r| Some(&r.previous_period)))
        .ints("n_previous", p.iter().map(|r| Some(r.n_previous as i64)))
        .ints("n_current", p.iter().map(|r| Some(r.n_current as i64)))
        .floats("psi", p.iter().map(|r| r.psi))
        .ints("buckets", p.iter().map(|r| Some(r.buckets.len() as i64)))
        .finish()?;
    write_parquet(&mut df, &tables.join("stability_psi.parquet"), meta)?;

    let k = &out.series.breaks;
    let mut df = TableBuilder::new()
        .strings("entity", k.iter().map(|r| Some(&r.entity)))
        .strings("series", k.iter().map(|r| Some(&r.series)))
        .strings("window", k.iter().map(|r| Some(&r.window)))
        .strings("target", k.iter().map(|r| Some(r.target)))
        .ints("n", k.iter().map(|r| Some(r.n as i64)))
        .strings("status", k.iter().map(|r| Some(r.status.as_str())))
        .floats("sigma", k.iter().map(|r| r.sigma))
        .floats("max_ratio", k.iter().map(|r| r.max_ratio))
        .dates("crossed_at", k.iter().map(|r| r.crossed_at))
        .dates("crossed_at_1pct", k.iter().map(|r| r.crossed_at_1pct))
        .floats("ols_statistic", k.iter().map(|r| r.ols_statistic))
        .finish()?;
    write_parquet(&mut df, &tables.join("stability_breaks.parquet"), meta)?;

    let c = &out.residuals.curves;
    let mut df = TableBuilder::new()
        .dates("date", c.iter().map(|r| Some(r.date)))
        .strings("entity", c.iter().map(|r| Some(&r.entity)))
        .strings("method", c.iter().map(|r| Some(&r.method)))
        .ints("n", c.iter().map(|r| Some(r.n as i64)))
        .floats("rmse_bp", c.iter().map(|r| Some(r.rmse_bp)))
        .floats("max_abs_bp", c.iter().map(|r| Some(r.max_abs_bp)))
        .strings("worst_tenor", c.iter().map(|r| Some(&r.worst_tenor)))
        .bools("converged", c.iter().map(|r| Some(r.converged)))
        .bools("reprices", c.iter().map(|r| Some(r.reprices)))
        .finish()?;
    write_parquet(&mut df, &tables.join("residual_curves.parquet"), meta)?;

    let t = &out.residuals.tenors;
    let mut df = TableBuilder::new()
        .strings("method", t.iter().map(|r| Some(&r.method)))
        .strings("tenor", t.iter().map(|r| Some(&r.tenor)))
        .ints("n", t.iter().map(|r| Some(r.n as i64)))
        .floats("q01", t.iter().map(|r| Some(r.q01)))
        .floats("q05", t.iter().map(|r| Some(r.q05)))
        .floats("q50", t.iter().map(|r| Some(r.q50)))
        .floats("q95", t.iter().map(|r| Some(r.q95)))
        .floats("q99", t.iter().map(|r| Some(r.q99)))
        .floats("abs_q01", t.iter().map(|r| Some(r.abs_q01)))
        .floats("abs_q05", t.iter().map(|r| Some(r.abs_q05)))
        .floats("abs_q50", t.iter().map(|r| Some(r.abs_q50)))
        .floats("abs_q95", t.iter().map(|r| Some(r.abs_q95)))
        .floats("abs_q99", t.iter().map(|r| Some(r.abs_q99)))
        .finish()?;
    write_parquet(&mut df, &tables.join("residual_tenors.parquet"), meta)?;

    let w = &out.residuals.worst;
    let mut df = TableBuilder::new()
        .ints("rank", w.iter().map(|r| Some(r.rank as i64)))
        .dates("date", w.iter().map(|r| Some(r.residual.date)))
        .strings("entity", w.iter().map(|r| Some(&r.residual.entity)))
        .strings("method", w.iter().map(|r| Some(&r.residual.method)))
        .strings("instrument", w.iter().map(|r| Some(&r.residual.instrument)))
        .strings("tenor_or_bond", w.iter().map(|r| Some(&r.residual.tenor)))
        .floats("market", w.iter().map(|r| Some(r.residual.market)))
        .floats("model", w.iter().map(|r| Some(r.residual.model)))
        .floats("residual_bp", w.iter().map(|r| Some(r.residual.residual_bp)))
        .bools("converged", w.iter().map(|r| Some(r.residual.converged)))
        .finish()?;
    write_parquet(&mut df, &tables.join("residual_worst.parquet"), meta)?;

    let s = &out.residuals.repricing;
    let mut df = TableBuilder::new()
        .strings("method", s.iter().map(|r| Some(&r.method)))
        .ints("curves", s.iter().map(|r| Some(r.curves as i64)))
        .ints("repricing", s.iter().map(|r| Some(r.repricing as i64)))
        .floats("share", s.iter().map(|r| Some(r.share)))
        .floats("tolerance_bp", s.iter().map(|r| Some(r.tolerance_bp)))
        .finish()?;
    write_parquet(&mut df, &tables.join("residual_repricing.parquet"), meta)
}

/// A flag of any stage, in the shape of the `flags` table.
#[derive(Debug, Clone, PartialEq)]
pub struct AnyFlag {
    pub stage: &'static str,
    pub flag: FlagRow,
    pub table: Option<String>,
    pub source: Option<String>,
    pub row: Option<u64>,
}

/// Writes the `flags` table: data-quality flags (with their source file and row) and the
/// review stages' flags, red first within each stage.
pub fn write_flags(flags: &[AnyFlag], path: &Path, meta: &[(String, String)]) -> Result<()> {
    let mut df = TableBuilder::new()
        .strings("rule", flags.iter().map(|r| Some(&r.flag.rule)))
        .strings("severity", flags.iter().map(|r| Some(&r.flag.severity)))
        .strings("entity", flags.iter().map(|r| r.flag.entity.as_ref()))
        .strings("series", flags.iter().map(|r| Some(&r.flag.series)))
        .strings("period", flags.iter().map(|r| Some(&r.flag.period)))
        .dates("date", flags.iter().map(|r| r.flag.date))
        .floats("value", flags.iter().map(|r| Some(r.flag.value)))
        .floats("threshold", flags.iter().map(|r| Some(r.flag.threshold)))
        .strings("explanation", flags.iter().map(|r| Some(&r.flag.explanation)))
        .strings("stage", flags.iter().map(|r| Some(r.stage)))
        .strings("table", flags.iter().map(|r| r.table.as_ref()))
        .strings("source", flags.iter().map(|r| r.source.as_ref()))
        .ints("row", flags.iter().map(|r| r.row.map(|x| x as i64)))
        .finish()?;
    write_parquet(&mut df, path, meta)
}

/// The data-quality flags in the common shape.
pub fn quality_flags(ds: &Dataset) -> Vec<AnyFlag> {
    ds.flags
        .iter()
        .map(|f| AnyFlag {
            stage: "data_quality",
            flag: FlagRow {
                rule: f.rule.to_string(),
                severity: f.severity.to_string(),
                entity: Some(f.entity.clone()),
                series: f.series.clone(),
                period: f.date.to_string(),
                date: Some(f.date),
                value: f.value,
                threshold: f.threshold,
                explanation: f.explanation.clone(),
            },
            table: Some(f.table.to_string()),
            source: Some(f.source.clone()),
            row: Some(f.row),
        })
        .collect()
}
