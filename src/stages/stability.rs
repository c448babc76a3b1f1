//! The stability stage of a run: turns the calibrated curves, the CIR fits and the residuals
//! into the plain inputs of [`crate::stability`], and writes its tables.

use crate::backtest::GradeBook;
use crate::error::Result;
use crate::ingest::Dataset;
use crate::stability::{
    self, spread_move_sorted, CalibrationCounts, MarketMove, PanelBuilder, ResidualAnalysis, ResidualObservation,
    ResidualReview, SpreadEdge, StabilityOutput, StabilitySettings,
};
use crate::stages::calibrate::CdsCurve;
use crate::tables::{self, review::PsiRecord};
use crate::tables::{HazardCurveRow, IntensityParamRow, ResidualRow};
use crate::text::RowStatus;
use chrono::NaiveDate;
use std::collections::BTreeSet;
use std::path::Path;
use std::sync::Arc;

/// The grade book of the dataset's grades table (see [`GradeBook`]).
pub fn grade_book(ds: &Dataset) -> GradeBook {
    GradeBook::new(ds.grades.iter().flat_map(|g| g.rows.iter().map(|(r, _)| (r.entity.clone(), r.from_date, r.grade))))
}

/// Entities quoted in more than one currency or tier (seniority and documentation clause) in
/// the CDS panel's usable rows: their series are kept as `entity/CCY` or `entity/CCY/tier`
/// ([`curve_class`]). Known before any curve is calibrated, so every series can be named as
/// its rows stream past; a property of each entity alone, so the union over entity shards is
/// the whole run's.
pub fn multi_currency(panel: &crate::ingest::cds::CdsPanel) -> BTreeSet<String> {
    let mut first: std::collections::HashMap<u32, (u32, u32)> = std::collections::HashMap::new();
    let mut multi: BTreeSet<String> = BTreeSet::new();
    for r in &panel.rows {
        let c = *first.entry(r.entity).or_insert((r.currency, r.tier));
        if c != (r.currency, r.tier) {
            multi.insert(panel.entities.name(r.entity).to_string());
        }
    }
    multi
}

/// The part of a series name after the entity for a name quoted in several currencies or
/// tiers: the currency, then `/tier` when the curve has one (`USD`, `USD/senior/no_restr`).
pub fn curve_class(currency: &str, tier: &str) -> String {
    if tier.is_empty() {
        currency.to_string()
    } else {
        format!("{currency}/{tier}")
    }
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
    /// The (entity, currency, seniority, doc_clause) labels last asked for and their answer.
    last: Option<(Arc<str>, Arc<str>, Option<Arc<str>>, Option<Arc<str>>, Arc<str>)>,
    /// [`Labels::entity_of`]'s answers by the addresses of the labels asked with (the rows of
    /// the CDS curves share one label per entity, currency and tier part). Each entry holds
    /// the labels of its key, so that no key's address is freed and reused while the entry
    /// stands; emptied when it reaches [`ADDRESS_ENTRIES`] (rows whose labels are not shared
    /// would otherwise grow it without end).
    by_address: crate::hash::FastMap<[usize; 4], AddressEntry>,
}

/// The labels of an address key and the answer for them.
type AddressEntry = ([Option<Arc<str>>; 4], Arc<str>);

/// The most entries [`Labels::entity_of`] keeps by address.
const ADDRESS_ENTRIES: usize = 1 << 16;

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
    fn entity_of(
        &mut self,
        multi: &BTreeSet<String>,
        e: &Arc<str>,
        c: &Arc<str>,
        s: &Option<Arc<str>>,
        d: &Option<Arc<str>>,
    ) -> Arc<str> {
        let same = |a: &Option<Arc<str>>, b: &Option<Arc<str>>| match (a, b) {
            (None, None) => true,
            (Some(a), Some(b)) => Arc::ptr_eq(a, b),
            _ => false,
        };
        if let Some((le, lc, ls, ld, l)) = &self.last {
            if Arc::ptr_eq(le, e) && Arc::ptr_eq(lc, c) && same(ls, s) && same(ld, d) {
                return l.clone();
            }
        }
        let address = |a: &Arc<str>| Arc::as_ptr(a) as *const u8 as usize;
        let key = [address(e), address(c), s.as_ref().map_or(0, address), d.as_ref().map_or(0, address)];
        let l = match self.by_address.get(&key) {
            Some((_, l)) => l.clone(),
            None => {
                let l = if multi.contains(&**e) {
                    let tier = crate::ingest::cds::tier_label(s.as_deref(), d.as_deref());
                    self.entity(multi, e, &curve_class(c, &tier))
                } else {
                    self.entity(multi, e, c)
                };
                if self.by_address.len() >= ADDRESS_ENTRIES {
                    self.by_address.clear();
                }
                self.by_address.insert(key, ([Some(e.clone()), Some(c.clone()), s.clone(), d.clone()], l.clone()));
                l
            }
        };
        self.last = Some((e.clone(), c.clone(), s.clone(), d.clone(), l.clone()));
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

/// The name of the series of a node's hazard.
fn node_label(tenor: crate::time::Tenor) -> Arc<str> {
    format!("hazard_node_{tenor}").into()
}

/// An entity's kind of curve: (currency, seniority, documentation clause), and the index of
/// its series entity's state.
type CurveKind = (String, Option<String>, Option<String>, usize);

/// A series of [`CurveSeries`] for one series entity.
#[derive(Clone, Copy, PartialEq, Eq)]
enum Slot {
    Pd1y,
    Hazard5y,
    Node(crate::time::Tenor),
}

/// The par-spread quotes of a curve (`backtest::spreads_of`: tenor in months, bp) into
/// `out`, as a map by tenor holds them: increasing tenors, the last quote of a tenor kept.
fn sorted_spreads(quotes: &[crate::calibrate::bootstrap::BootstrapQuote], out: &mut Vec<(u32, f64)>) {
    out.clear();
    out.extend(crate::stages::backtest::spread_quotes(quotes).map(|q| (q.tenor_months, q.spread_bp)));
    if out.windows(2).any(|w| w[0].0 >= w[1].0) {
        // Stable: the quotes of one tenor keep their order, and the last one stays.
        out.sort_by_key(|&(t, _)| t);
        out.dedup_by(|later, kept| {
            let same = later.0 == kept.0;
            if same {
                *kept = *later;
            }
            same
        });
    }
}

/// What [`CurveSeries`] keeps per series entity: its label, its grades, the indices of its
/// histories in the panel builder once made, and the date and par spreads of its latest curve.
struct SeriesEntity<'a> {
    entity: Arc<str>,
    grades: &'a [(NaiveDate, u32)],
    slots: Vec<(Slot, usize)>,
    /// The date and par spreads (tenor in months, bp; increasing tenors) of the latest curve.
    last: Option<(NaiveDate, Vec<(u32, f64)>)>,
}

impl SeriesEntity<'_> {
    /// The index of this entity's history of `slot` (named `series`), made when new.
    fn slot(&mut self, slot: Slot, series: &Arc<str>, observations: &mut PanelBuilder) -> usize {
        if let Some(&(_, i)) = self.slots.iter().find(|(s, _)| *s == slot) {
            return i;
        }
        let i = observations.history_index(series, &self.entity);
        self.slots.push((slot, i));
        i
    }
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
    /// Every series entity that has had a curve, in the order of its first.
    states: Vec<SeriesEntity<'a>>,
    /// The state of the curves of an entity: by the entity's text, then its kinds of curve
    /// (usually one).
    by_text: crate::hash::FastMap<String, Vec<CurveKind>>,
    /// The state of a series entity by its label's address (the labels hand out one label per
    /// text and hold it): (entity, class) pairs with the same series entity share it.
    by_label: crate::hash::FastMap<usize, usize>,
    observations: PanelBuilder,
    market: Vec<MarketMove>,
    /// Each series entity's first curve's spreads (see [`SpreadEdge`]).
    firsts: Vec<SpreadEdge>,
    /// The par spreads of the curve being added (a vector kept from curve to curve).
    spreads: Vec<(u32, f64)>,
    /// Curves to come per series entity (by its label's address), when known
    /// ([`CurveSeries::expect_curves`]): its histories are made that long at once.
    expected: crate::hash::FastMap<usize, usize>,
}

impl<'a> CurveSeries<'a> {
    pub fn new(grades: &'a GradeBook, multi: &'a BTreeSet<String>) -> Self {
        let mut labels = Labels::default();
        let (pd_1y, hazard_5y) = (labels.get("pd_1y"), labels.get("hazard_5y"));
        CurveSeries {
            grades,
            multi,
            labels,
            pd_1y,
            hazard_5y,
            node_labels: Default::default(),
            states: Vec::new(),
            by_text: Default::default(),
            by_label: Default::default(),
            observations: PanelBuilder::new(),
            market: Vec::new(),
            firsts: Vec::new(),
            spreads: Vec::new(),
            expected: Default::default(),
        }
    }

    /// Counts the curves the panel's rows (sorted, a curve a run of (date, entity, currency,
    /// tier)) will give each series entity on the dates of `range`, so that its histories are
    /// allocated at their length when its first curve comes.
    pub fn expect_curves(&mut self, panel: &crate::ingest::cds::CdsPanel, range: crate::parts::DateRange) {
        let mut by_curve: crate::hash::FastMap<(u32, u32, u32), usize> = Default::default();
        let mut last = None;
        for r in &panel.rows {
            let key = (r.date, r.entity, r.currency, r.tier);
            if last != Some(key) {
                last = Some(key);
                if range.contains(r.date) {
                    *by_curve.entry((r.entity, r.currency, r.tier)).or_default() += 1;
                }
            }
        }
        for ((e, c, t), n) in by_curve {
            let class = curve_class(panel.currencies.name(c), &panel.tiers.label(t));
            let entity = self.labels.entity(self.multi, panel.entities.name(e), &class);
            *self.expected.entry(Arc::as_ptr(&entity) as *const u8 as usize).or_default() += n;
        }
    }

    /// Takes the series of the curve of (`date`, `e`, `c`) in `tier` (seniority,
    /// documentation clause).
    pub fn add(&mut self, date: NaiveDate, e: &str, c: &str, tier: (Option<&str>, Option<&str>), curve: &CdsCurve) {
        let k = self.state_of(e, c, tier);
        let state = &mut self.states[k];
        let grade = GradeBook::grade_in(state.grades, date);
        if state.last.is_none() {
            if let Some(&n) = self.expected.get(&(Arc::as_ptr(&state.entity) as *const u8 as usize)) {
                // The entity's first curve: its histories get their length at once.
                let (pd, h5) = (
                    state.slot(Slot::Pd1y, &self.pd_1y, &mut self.observations),
                    state.slot(Slot::Hazard5y, &self.hazard_5y, &mut self.observations),
                );
                self.observations.reserve_at(pd, n);
                self.observations.reserve_at(h5, n);
                for q in &curve.quotes {
                    let label = self.node_labels.entry(q.tenor).or_insert_with(|| node_label(q.tenor));
                    let i = state.slot(Slot::Node(q.tenor), label, &mut self.observations);
                    self.observations.reserve_at(i, n);
                }
            }
        }
        if let Some(h) = &curve.curve {
            let observations = &mut self.observations;
            let mut push = |slot: Slot, series: &Arc<str>, value: f64| {
                if value.is_finite() {
                    let i = state.slot(slot, series, observations);
                    observations.push_at(i, grade, date, value);
                }
            };
            push(Slot::Pd1y, &self.pd_1y, 1.0 - h.survival_at(1.0));
            push(Slot::Hazard5y, &self.hazard_5y, h.hazard_at(5.0));
            if h.hazards().len() == curve.quotes.len() {
                for (q, &x) in curve.quotes.iter().zip(h.hazards()) {
                    push(
                        Slot::Node(q.tenor),
                        self.node_labels.entry(q.tenor).or_insert_with(|| node_label(q.tenor)),
                        x,
                    );
                }
            }
        }
        // The curve's par spreads by tenor as a map of them holds them (increasing tenors, the
        // last quote of a tenor kept), built in a vector kept from curve to curve.
        let spreads = &mut self.spreads;
        sorted_spreads(&curve.quotes, spreads);
        match &mut state.last {
            Some((last_date, prev)) => {
                self.market.extend(spread_move_sorted(&state.entity, date, prev, spreads));
                *last_date = date;
                // The previous curve's vector is the next curve's to fill.
                std::mem::swap(prev, spreads);
            }
            None => {
                self.firsts.push(SpreadEdge {
                    entity: state.entity.clone(),
                    date,
                    last: false,
                    spreads: spreads.iter().copied().collect(),
                });
                state.last = Some((date, spreads.clone()));
            }
        }
    }

    /// The index in `states` of the series entity of the curves of entity `e` in currency `c`
    /// and `tier` (seniority, documentation clause), made when new.
    fn state_of(&mut self, e: &str, c: &str, tier: (Option<&str>, Option<&str>)) -> usize {
        let same = |(currency, s, d, _): &&CurveKind| currency == c && s.as_deref() == tier.0 && d.as_deref() == tier.1;
        if let Some(&(_, _, _, k)) = self.by_text.get(e).and_then(|v| v.iter().find(same)) {
            return k;
        }
        let class = curve_class(c, &crate::ingest::cds::tier_label(tier.0, tier.1));
        let entity = self.labels.entity(self.multi, e, &class);
        let address = Arc::as_ptr(&entity) as *const u8 as usize;
        let k = match self.by_label.get(&address) {
            Some(&k) => k,
            None => {
                self.states.push(SeriesEntity {
                    entity,
                    grades: self.grades.history(e),
                    slots: Vec::new(),
                    last: None,
                });
                self.by_label.insert(address, self.states.len() - 1);
                self.states.len() - 1
            }
        };
        let kind = (c.to_string(), tier.0.map(str::to_string), tier.1.map(str::to_string), k);
        self.by_text.entry(e.to_string()).or_default().push(kind);
        k
    }

    /// The curve observations, the market moves, and each series entity's first and last
    /// curve's spreads (firsts in arrival order, then lasts by entity).
    pub fn finish(self) -> (PanelBuilder, Vec<MarketMove>, Vec<SpreadEdge>) {
        let mut edges = self.firsts;
        let mut lasts: Vec<SpreadEdge> = self
            .states
            .into_iter()
            .filter_map(|s| {
                s.last.map(|(date, spreads)| SpreadEdge {
                    entity: s.entity,
                    date,
                    last: true,
                    spreads: spreads.into_iter().collect(),
                })
            })
            .collect();
        lasts.sort_by(|a, b| a.entity.cmp(&b.entity));
        edges.extend(lasts);
        (self.observations, self.market, edges)
    }
}

/// What the stability stage takes from the node and residual rows, digested as the rows pass
/// in the tables' order: per CDS curve its failures and infeasible nodes (from the node
/// statuses), and the residual review ([`ResidualReview`]) of every repricing residual.
/// One curve's (date, failures, infeasible nodes): 12 bytes, one per curve of the run.
type CurveCount = (NaiveDate, u32, u32);

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
        RowDigest {
            labels: Labels::default(),
            multi,
            counts: Default::default(),
            fixed: Default::default(),
            run: None,
            review: ResidualReview::new(settings),
        }
    }

    /// Counts the statuses of CDS node rows. A curve's nodes are consecutive rows: they are
    /// counted together and recorded once per curve (a curve met again later is merged with
    /// what it had at [`RowDigest::finish`]).
    pub fn nodes(&mut self, hazard: &[HazardCurveRow]) {
        for r in hazard.iter().filter(|r| r.source == crate::text::CurveSource::Cds) {
            let entity = self.labels.entity_of(self.multi, &r.entity, &r.currency, &r.seniority, &r.doc_clause);
            let same = self.run.as_ref().is_some_and(|(e, (d, _, _))| *d == r.date && Arc::ptr_eq(e, &entity));
            if !same {
                self.end_run();
                self.run = Some((entity, (r.date, 0, 0)));
            }
            if let Some((_, (_, failures, infeasible))) = self.run.as_mut() {
                match r.status {
                    RowStatus::Ok => {}
                    RowStatus::Floored | RowStatus::Infeasible => *infeasible += 1,
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
            let mut get =
                |v: &'static str| fixed.entry((v.as_ptr() as usize, v.len())).or_insert_with(|| labels.get(v)).clone();
            let (method, instrument) = (get(r.method.as_str()), get(r.instrument));
            let o = ResidualObservation {
                date: r.date,
                entity: self.labels.entity_of(self.multi, &r.entity, &r.currency, &r.seniority, &r.doc_clause),
                method,
                instrument,
                tenor: r.tenor_or_bond.clone(),
                market: r.market,
                model: r.model,
                residual_bp: r.residual_bp,
                converged: r.status == RowStatus::Ok,
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
                        *f = (*f).max(u64::from(failures));
                        *i += u64::from(infeasible);
                    }
                    _ => counts.push(CalibrationCounts {
                        entity: entity.clone(),
                        date,
                        failures: u64::from(failures),
                        infeasible: u64::from(infeasible),
                    }),
                }
            }
        }
        (counts, self.review.finish())
    }
}

/// Builds the stability core's inputs from the curve series ([`CurveSeries`]; over partitions,
/// appended in shard order), the CIR fits (four parameters each, after the curve series) and
/// the digest of the node and residual rows.
pub fn stability_inputs(
    mut observations: PanelBuilder,
    mut market: Vec<MarketMove>,
    params: &[IntensityParamRow],
    grades: &GradeBook,
    multi: &BTreeSet<String>,
    digest: RowDigest,
) -> StabilityInputs {
    market.sort_by(|a, b| (a.date, &a.entity).cmp(&(b.date, &b.entity)));
    let mut labels = Labels::default();
    for p in params {
        let entity = labels.entity(multi, &p.entity, &p.currency);
        let grade = grades.grade(&p.entity, p.date);
        for (series, v) in
            [("cir_kappa", p.kappa), ("cir_theta", p.theta), ("cir_sigma", p.sigma), ("cir_lambda0", p.lambda0)]
        {
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
    stability::analyse_gathered(inputs.observations, &inputs.market, &inputs.counts, inputs.residuals, settings)
        .map_err(|e| crate::error::Error::Stage { stage: "stability", source: e.into() })
}

/// Writes `stability`, `stability_bands`, `stability_psi`, `stability_breaks`,
/// `residual_curves`, `residual_tenors`, `residual_worst` and `residual_repricing`.
pub fn write_stability_tables(out: &StabilityOutput, dir: &Path, meta: &[(String, String)]) -> Result<()> {
    let psi: Vec<PsiRecord> = out.series.psi.iter().map(PsiRecord::from).collect();
    tables::write_all(vec![
        Box::new(|| tables::write(&out.series.rows, dir, meta)),
        Box::new(|| tables::write(&out.series.cross_section, dir, meta)),
        Box::new(|| tables::write(&psi, dir, meta)),
        Box::new(|| tables::write(&out.series.breaks, dir, meta)),
        Box::new(|| tables::write(&out.residuals.curves, dir, meta)),
        Box::new(|| tables::write(&out.residuals.tenors, dir, meta)),
        Box::new(|| tables::write(&out.residuals.worst, dir, meta)),
        Box::new(|| tables::write(&out.residuals.repricing, dir, meta)),
    ])
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stability::spread_move;
    use std::collections::BTreeMap;

    /// A curve's spreads as sorted pairs are the map of them a collect builds: quotes in and
    /// out of tenor order, a tenor quoted twice (the later quote kept), upfront quotes left out.
    #[test]
    fn sorted_spreads_are_the_map_of_the_spreads() {
        use crate::calibrate::bootstrap::BootstrapQuote;
        use crate::instruments::cds::CdsQuote;
        use crate::time::Tenor;
        let quote = |m: u32, q: CdsQuote| BootstrapQuote {
            tenor: Tenor::from_months(m).unwrap(),
            quote: q,
            recovery: 0.4,
            maturity: None,
        };
        let upfront = CdsQuote::Upfront { upfront: 0.01, coupon: 0.01 };
        let cases: Vec<Vec<BootstrapQuote>> = vec![
            vec![],
            vec![quote(6, CdsQuote::ParSpread(0.001)), quote(12, CdsQuote::ParSpread(0.002))],
            vec![quote(60, CdsQuote::ParSpread(0.003)), quote(12, CdsQuote::ParSpread(0.002)), quote(36, upfront)],
            vec![
                quote(12, CdsQuote::ParSpread(0.002)),
                quote(60, CdsQuote::ParSpread(0.004)),
                quote(12, CdsQuote::ParSpread(0.005)),
                quote(6, CdsQuote::ParSpread(0.001)),
                quote(60, CdsQuote::ParSpread(0.007)),
            ],
        ];
        let mut out = vec![(99, 1.0); 9];
        for quotes in &cases {
            let want: Vec<(u32, f64)> = crate::stages::backtest::spreads_of(quotes)
                .into_iter()
                .map(|q| (q.tenor_months, q.spread_bp))
                .collect::<BTreeMap<u32, f64>>()
                .into_iter()
                .collect();
            sorted_spreads(quotes, &mut out);
            assert_eq!(out, want);
        }
    }

    /// The series entity of a row's labels is the one worked out from their texts, whether
    /// the labels are shared across rows (answered by address), fresh for each row, or more
    /// than the address entries hold: names quoted in one currency and in two, with tiers that
    /// differ in the seniority or only in the clause.
    #[test]
    fn entity_labels_by_address_are_the_worked_out_ones() {
        let multi: BTreeSet<String> = ["Beta Fictional".to_string()].into_iter().collect();
        let texts = |i: usize| {
            let e = ["Alpha Fictional", "Beta Fictional", "Gamma Fictional"][i % 3];
            let c = ["EUR", "USD"][(i / 3) % 2];
            let s = [None, Some("senior"), Some("sub")][(i / 6) % 3];
            let d = [None, Some("clause-a"), Some("clause-b")][(i / 18) % 3];
            (e, c, s, d)
        };
        let want = |(e, c, s, d): (&str, &str, Option<&str>, Option<&str>)| {
            if multi.contains(e) {
                series_name(&multi, e, &curve_class(c, &crate::ingest::cds::tier_label(s, d)))
            } else {
                e.to_string()
            }
        };
        let arc = |t: Option<&str>| t.map(Arc::<str>::from);
        // One label per text, as a panel's rows share them.
        let mut one: std::collections::HashMap<&str, Arc<str>> = Default::default();
        let mut share = |t: &'static str| one.entry(t).or_insert_with(|| Arc::from(t)).clone();
        let shared: Vec<_> = (0..54)
            .map(&texts)
            .map(|(e, c, s, d)| (share(e), share(c), s.map(&mut share), d.map(&mut share)))
            .collect();
        let mut labels = Labels::default();
        for round in 0..3 * ADDRESS_ENTRIES {
            let i = (round * 7) % 54;
            let (e, c, s, d) = if round % 2 == 0 {
                shared[i].clone()
            } else {
                let (e, c, s, d) = texts(i);
                (Arc::from(e), Arc::from(c), arc(s), arc(d))
            };
            let got = labels.entity_of(&multi, &e, &c, &s, &d);
            assert_eq!(&*got, want(texts(i)), "round {round}");
        }
        assert!(labels.by_address.len() <= ADDRESS_ENTRIES);
    }

    /// The series taken through each series entity's state (its histories and grades looked
    /// up once) are those of looking everything up by text at each curve, the form the state
    /// replaced: the same observations in the same histories in the same order, the same
    /// market moves and spread edges. Names in one currency and in two (series entities per
    /// currency), with and without grades, with and without their curve counts known ahead,
    /// curves without a hazard curve and with fewer hazards than quotes, and two curve classes of
    /// one series entity.
    #[test]
    fn entity_states_are_the_lookups_by_text() {
        use crate::calibrate::bootstrap::BootstrapQuote;
        use crate::curves::HazardCurve;
        use crate::instruments::CdsQuote;
        use crate::time::Tenor;
        let d0 = NaiveDate::from_ymd_opt(2024, 1, 2).unwrap();
        let grades = GradeBook::new(vec![
            ("Alpha Fictional".to_string(), d0, 3),
            ("Alpha Fictional".to_string(), d0 + chrono::Days::new(9), 4),
            ("Beta Fictional".to_string(), d0 + chrono::Days::new(4), 2),
        ]);
        let multi: BTreeSet<String> = ["Beta Fictional".to_string()].into_iter().collect();
        type Tier = (Option<&'static str>, Option<&'static str>);
        let names: [(&str, &str, Tier); 6] = [
            ("Alpha Fictional", "EUR", (None, None)),
            ("Beta Fictional", "EUR", (None, None)),
            ("Beta Fictional", "USD", (None, None)),
            ("Beta Fictional", "EUR", (Some("senior"), Some("clause-a"))),
            ("Gamma Fictional", "EUR", (None, None)),
            // Not a multi-currency name: one series entity with the curves above.
            ("Gamma Fictional", "USD", (Some("senior"), None)),
        ];
        let mut curves: Vec<(NaiveDate, &str, &str, Tier, CdsCurve)> = Vec::new();
        for day in 0..25u64 {
            let date = d0 + chrono::Days::new(day);
            for (k, &(e, c, tier)) in names.iter().enumerate() {
                let months: Vec<u32> =
                    [6, 12, 36, 60, 120].into_iter().filter(|m| (day + k as u64 + *m as u64) % 7 != 0).collect();
                let quotes: Vec<BootstrapQuote> = months
                    .iter()
                    .map(|&m| BootstrapQuote {
                        tenor: Tenor::from_months(m).unwrap(),
                        quote: CdsQuote::ParSpread(1e-4 * (50.0 + (day * 3 + m as u64 + k as u64) as f64)),
                        recovery: 0.4,
                        maturity: None,
                    })
                    .collect();
                let n = if (day + k as u64) % 5 == 0 { quotes.len() - 1 } else { quotes.len() };
                let times: Vec<f64> = months.iter().take(n).map(|&m| f64::from(m) / 12.0).collect();
                let hazards: Vec<f64> = (0..n).map(|i| 0.01 + 0.001 * (i as f64 + day as f64)).collect();
                let curve = ((day + k as u64) % 6 != 3).then(|| HazardCurve::new(date, times, hazards).unwrap());
                curves.push((date, e, c, tier, CdsCurve { quotes, curve }));
            }
        }
        // Curves known ahead for two of the series entities.
        let ahead = |labels: &mut Labels| -> crate::hash::FastMap<usize, usize> {
            [("Alpha Fictional", "EUR"), ("Beta Fictional", "USD")]
                .into_iter()
                .map(|(e, c)| (Arc::as_ptr(&labels.entity(&multi, e, c)) as *const u8 as usize, 25))
                .collect()
        };
        let mut series = CurveSeries::new(&grades, &multi);
        series.expected = ahead(&mut series.labels);
        for (date, e, c, tier, curve) in &curves {
            series.add(*date, e, c, *tier, curve);
        }
        let (panel, market, edges) = series.finish();

        // Everything by text at each curve.
        let mut labels = Labels::default();
        let expected = ahead(&mut labels);
        let (pd_1y, hazard_5y) = (labels.get("pd_1y"), labels.get("hazard_5y"));
        let mut node_labels: std::collections::HashMap<Tenor, Arc<str>> = Default::default();
        let mut observations = PanelBuilder::new();
        let mut last: std::collections::HashMap<Arc<str>, (NaiveDate, BTreeMap<u32, f64>)> = Default::default();
        let (mut want_market, mut firsts) = (Vec::new(), Vec::new());
        for (date, e, c, (s, d), curve) in &curves {
            let entity = labels.entity(&multi, e, &curve_class(c, &crate::ingest::cds::tier_label(*s, *d)));
            let grade = grades.grade(e, *date);
            if let (Some(&n), false) =
                (expected.get(&(Arc::as_ptr(&entity) as *const u8 as usize)), last.contains_key(&entity))
            {
                observations.reserve(&pd_1y, &entity, n);
                observations.reserve(&hazard_5y, &entity, n);
                for q in &curve.quotes {
                    observations.reserve(node_labels.entry(q.tenor).or_insert_with(|| node_label(q.tenor)), &entity, n);
                }
            }
            if let Some(h) = &curve.curve {
                observations.push(&pd_1y, &entity, grade, *date, 1.0 - h.survival_at(1.0));
                observations.push(&hazard_5y, &entity, grade, *date, h.hazard_at(5.0));
                if h.hazards().len() == curve.quotes.len() {
                    for (q, &x) in curve.quotes.iter().zip(h.hazards()) {
                        let label = node_labels.entry(q.tenor).or_insert_with(|| node_label(q.tenor)).clone();
                        observations.push(&label, &entity, grade, *date, x);
                    }
                }
            }
            let spreads: BTreeMap<u32, f64> = crate::stages::backtest::spreads_of(&curve.quotes)
                .into_iter()
                .map(|q| (q.tenor_months, q.spread_bp))
                .collect();
            match last.get(&entity) {
                Some((_, prev)) => want_market.extend(spread_move(&entity, *date, prev, &spreads)),
                None => firsts.push(SpreadEdge {
                    entity: entity.clone(),
                    date: *date,
                    last: false,
                    spreads: spreads.clone(),
                }),
            }
            last.insert(entity, (*date, spreads));
        }
        let mut lasts: Vec<SpreadEdge> = last
            .into_iter()
            .map(|(entity, (date, spreads))| SpreadEdge { entity, date, last: true, spreads })
            .collect();
        lasts.sort_by(|a, b| a.entity.cmp(&b.entity));
        firsts.extend(lasts);

        let got: Vec<crate::stability::Observation> = panel.observations().collect();
        let want: Vec<crate::stability::Observation> = observations.observations().collect();
        assert!(got.len() > 400 && got.iter().any(|o| o.grade.is_none()) && got.iter().any(|o| o.grade == Some(4)));
        assert_eq!(got, want);
        assert!(market.len() > 80);
        assert_eq!(market, want_market);
        assert_eq!(edges.len(), 10);
        assert_eq!(edges, firsts);
    }
}
