//! The stage's inputs (plain structs the pipeline fills from its tables) and their first
//! preparation: one date-ordered history per (series, entity), and the daily moves along it.

use super::period::Period;
use super::settings::StabilitySettings;
use chrono::NaiveDate;
use std::collections::BTreeMap;
use std::sync::Arc;

/// One value of one parameter series for one entity on one date.
#[derive(Debug, Clone, PartialEq)]
pub struct Observation {
    /// Series name, e.g. `pd_1y`, `hazard_5y`, `hazard_node_3y`, `cir_kappa` (shared: the
    /// observations of one series or entity hold one allocation between them).
    pub series: Arc<str>,
    /// Entity identifier.
    pub entity: Arc<str>,
    /// The entity's internal grade on that date (1 = best), when grades are known.
    pub grade: Option<u32>,
    /// Calibration date.
    pub date: NaiveDate,
    /// The parameter value, in the series' own unit (a decimal PD, a hazard per year, ...).
    pub value: f64,
}

/// How much an entity's market quotes moved on one date, to compare parameter moves with.
#[derive(Debug, Clone, PartialEq)]
pub struct MarketMove {
    /// Entity identifier.
    pub entity: Arc<str>,
    /// The later date of the move.
    pub date: NaiveDate,
    /// Mean over the entity's tenors of |par spread today - par spread on the previous quote
    /// date|, in bp.
    pub mean_abs_change_bp: f64,
    /// Mean over the same tenors of the previous date's par spread, in bp (the base of the
    /// relative move mean_abs_change_bp / mean_level_bp).
    pub mean_level_bp: f64,
}

impl MarketMove {
    /// The relative move, when both numbers are usable (finite, level > 0, change >= 0).
    pub fn relative(&self) -> Option<f64> {
        let ok = self.mean_abs_change_bp.is_finite()
            && self.mean_abs_change_bp >= 0.0
            && self.mean_level_bp.is_finite()
            && self.mean_level_bp > 0.0;
        ok.then(|| self.mean_abs_change_bp / self.mean_level_bp)
    }
}

/// Calibration outcomes of one entity on one date (all methods together).
#[derive(Debug, Clone, PartialEq)]
pub struct CalibrationCounts {
    /// Entity identifier.
    pub entity: Arc<str>,
    /// Calibration date.
    pub date: NaiveDate,
    /// Calibrations that failed (no curve or parameters produced).
    pub failures: u64,
    /// Calibrations that were infeasible (e.g. a bootstrap needing a negative hazard).
    pub infeasible: u64,
}

/// What happened to the observations on entry.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct InputSummary {
    /// Observations used.
    pub used: usize,
    /// Observations dropped because the value was not finite.
    pub non_finite: usize,
    /// Observations dropped as a repeat of (series, entity, date); the first in input order is kept.
    pub duplicates: usize,
    /// Market moves dropped as unusable (see [`MarketMove::relative`]).
    pub market_unusable: usize,
}

/// One point of a history, in 16 bytes (a run holds tens of millions): the grade is kept as
/// grade + 1 in a non-zero integer, so that "no grade" costs no extra word (grades up to
/// `u32::MAX - 1`; the grades table allows far fewer).
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct Point {
    pub date: NaiveDate,
    pub value: f64,
    grade: Option<std::num::NonZeroU32>,
}

impl Point {
    pub fn new(date: NaiveDate, value: f64, grade: Option<u32>) -> Point {
        Point { date, value, grade: grade.and_then(|g| g.checked_add(1)).and_then(std::num::NonZeroU32::new) }
    }

    pub fn grade(&self) -> Option<u32> {
        self.grade.map(|g| g.get() - 1)
    }
}

/// Date-ordered histories keyed by (series, entity).
pub(crate) type Panel = BTreeMap<(String, String), Vec<Point>>;

/// The panel built one observation at a time, so the observations need not be kept: each
/// (series, entity) history collects its points in arrival order; [`PanelBuilder::finish`]
/// then puts each in date order, keeping the first of a repeated date.
#[derive(Debug, Clone, Default)]
pub struct PanelBuilder {
    index: std::collections::HashMap<(Arc<str>, Arc<str>), usize>,
    /// The same index by the labels' addresses, for labels shared between observations (the
    /// usual case): no hashing of the text. Every label whose address is a key is held in
    /// `pinned`, so no address is freed and reused for other text while it is a key.
    by_address: crate::hash::FastMap<(usize, usize), usize>,
    pinned: Vec<(Arc<str>, Arc<str>)>,
    histories: Vec<((Arc<str>, Arc<str>), Vec<Point>)>,
    non_finite: usize,
}

impl PanelBuilder {
    pub fn new() -> Self {
        Self::default()
    }

    /// Adds one value of `series` for `entity`; a non-finite value is counted and left out.
    pub fn push(&mut self, series: &Arc<str>, entity: &Arc<str>, grade: Option<u32>, date: NaiveDate, value: f64) {
        if !value.is_finite() {
            self.non_finite += 1;
            return;
        }
        let i = self.shared_slot(series, entity);
        self.push_at(i, grade, date, value);
    }

    /// Makes room for `additional` more values of (series, entity) in one allocation, for a
    /// history whose length is known ahead: histories that grow in step (one value per curve
    /// date) otherwise all reallocate at the same lengths, and the vectors they leave behind
    /// stay in the heap (a quarter of a GiB at each doubling at 2,000 names x 10 years).
    pub fn reserve(&mut self, series: &Arc<str>, entity: &Arc<str>, additional: usize) {
        let i = self.shared_slot(series, entity);
        self.reserve_at(i, additional);
    }

    /// The index of the history of (series, entity), made when new (as the first
    /// [`PanelBuilder::push`] to it would make it), for [`PanelBuilder::push_at`] and
    /// [`PanelBuilder::reserve_at`]: a caller that adds to the same histories curve after
    /// curve looks each up once.
    pub fn history_index(&mut self, series: &Arc<str>, entity: &Arc<str>) -> usize {
        self.shared_slot(series, entity)
    }

    /// [`PanelBuilder::push`] to the history `i` of [`PanelBuilder::history_index`].
    pub fn push_at(&mut self, i: usize, grade: Option<u32>, date: NaiveDate, value: f64) {
        if !value.is_finite() {
            self.non_finite += 1;
            return;
        }
        self.histories[i].1.push(Point::new(date, value, grade));
    }

    /// [`PanelBuilder::reserve`] for the history `i` of [`PanelBuilder::history_index`].
    pub fn reserve_at(&mut self, i: usize, additional: usize) {
        self.histories[i].1.reserve_exact(additional);
    }

    /// The history of (series, entity) by the labels' addresses, made when new.
    fn shared_slot(&mut self, series: &Arc<str>, entity: &Arc<str>) -> usize {
        let address = (Arc::as_ptr(series) as *const u8 as usize, Arc::as_ptr(entity) as *const u8 as usize);
        if let Some(&i) = self.by_address.get(&address) {
            return i;
        }
        let i = self.slot(series, entity);
        self.by_address.insert(address, i);
        self.pinned.push((series.clone(), entity.clone()));
        i
    }

    /// The history of (series, entity), by text, made when new.
    fn slot(&mut self, series: &Arc<str>, entity: &Arc<str>) -> usize {
        match self.index.get(&(series.clone(), entity.clone())) {
            Some(&i) => i,
            None => {
                self.index.insert((series.clone(), entity.clone()), self.histories.len());
                self.histories.push(((series.clone(), entity.clone()), Vec::new()));
                self.histories.len() - 1
            }
        }
    }

    /// Adds a run of values of one (series, entity), in order: the same as [`PanelBuilder::push`]
    /// for each, with one look-up of the history and room made for the run at once.
    pub fn push_run(
        &mut self,
        series: &Arc<str>,
        entity: &Arc<str>,
        points: impl ExactSizeIterator<Item = (Option<u32>, NaiveDate, f64)>,
    ) {
        let i = self.shared_slot(series, entity);
        let history = &mut self.histories[i].1;
        history.reserve_exact(points.len());
        for (grade, date, value) in points {
            if value.is_finite() {
                history.push(Point::new(date, value, grade));
            } else {
                self.non_finite += 1;
            }
        }
    }

    pub fn push_observation(&mut self, o: &Observation) {
        self.push(&o.series, &o.entity, o.grade, o.date, o.value);
    }

    /// Adds everything `later` collected after what this one has.
    pub fn append(&mut self, later: PanelBuilder) {
        self.non_finite += later.non_finite;
        for ((series, entity), points) in later.histories {
            let i = self.slot(&series, &entity);
            self.histories[i].1.extend(points);
        }
    }

    /// Observations held.
    pub fn len(&self) -> usize {
        self.histories.iter().map(|(_, v)| v.len()).sum()
    }

    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Every observation, history by history in arrival order of the histories.
    pub fn observations(&self) -> impl Iterator<Item = Observation> + '_ {
        self.histories.iter().flat_map(|((s, e), v)| {
            v.iter().map(move |p| Observation {
                series: s.clone(),
                entity: e.clone(),
                grade: p.grade(),
                date: p.date,
                value: p.value,
            })
        })
    }

    pub(crate) fn finish(self) -> (Panel, InputSummary) {
        use rayon::prelude::*;
        let mut summary = InputSummary { non_finite: self.non_finite, ..InputSummary::default() };
        // Each history put in date order alone, on rayon's threads.
        let mut histories = self.histories;
        let duplicates: Vec<usize> = histories
            .par_iter_mut()
            .map(|(_, points)| {
                let before = points.len();
                points.sort_by_key(|p| p.date);
                points.dedup_by_key(|p| p.date);
                before - points.len()
            })
            .collect();
        let mut panel: Panel = BTreeMap::new();
        for (((s, e), points), duplicates) in histories.into_iter().zip(duplicates) {
            summary.duplicates += duplicates;
            summary.used += points.len();
            panel.insert((s.to_string(), e.to_string()), points);
        }
        (panel, summary)
    }
}

/// Builds the panel: drops non-finite values and repeated dates (keeping the first in input order).
pub(crate) fn build_panel(observations: &[Observation]) -> (Panel, InputSummary) {
    let mut b = PanelBuilder::new();
    for o in observations {
        b.push_observation(o);
    }
    b.finish()
}

/// A move between two consecutive observations of one entity's series.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DailyMove {
    /// The later date; the move belongs to this date's period.
    pub date: NaiveDate,
    /// The earlier value.
    pub previous: f64,
    /// The later value.
    pub value: f64,
}

impl DailyMove {
    /// |value - previous|.
    pub fn abs_change(&self) -> f64 {
        (self.value - self.previous).abs()
    }

    /// |value - previous| / |previous|; `None` when the previous value is zero.
    pub fn abs_relative(&self) -> Option<f64> {
        (self.previous != 0.0).then(|| self.abs_change() / self.previous.abs())
    }
}

/// Moves between consecutive observations at most `max_gap_days` calendar days apart; a longer
/// gap breaks the chain (the step across it is not a daily move).
pub(crate) fn daily_moves(points: &[Point], max_gap_days: i64) -> Vec<DailyMove> {
    points
        .windows(2)
        .filter(|w| (w[1].date - w[0].date).num_days() <= max_gap_days)
        .map(|w| DailyMove { date: w[1].date, previous: w[0].value, value: w[1].value })
        .collect()
}

/// Mean relative market move per (entity, period), and the count of unusable rows.
pub(crate) fn market_by_period(
    market: &[MarketMove],
    settings: &StabilitySettings,
) -> (BTreeMap<(String, Period), f64>, usize) {
    // Summed by a hash of the key, each key's moves added in the moves' order (as the ordered
    // map of the keys summed them), then put in key order.
    let mut acc: crate::hash::FastMap<(&str, Period), (f64, usize)> = Default::default();
    let mut unusable = 0;
    for m in market {
        match m.relative() {
            Some(r) => {
                let e = acc.entry((&*m.entity, settings.period.of(m.date))).or_default();
                e.0 += r;
                e.1 += 1;
            }
            None => unusable += 1,
        }
    }
    (acc.into_iter().map(|((e, p), (s, n))| ((e.to_string(), p), s / n as f64)).collect(), unusable)
}

/// Summed calibration counts per (entity, period), with the number of dates reported.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub(crate) struct PeriodCounts {
    pub dates: usize,
    pub failures: u64,
    pub infeasible: u64,
}

/// Sums the counts per (entity, period).
pub(crate) fn counts_by_period(
    counts: &[CalibrationCounts],
    settings: &StabilitySettings,
) -> BTreeMap<(String, Period), PeriodCounts> {
    // By a hash of the key (the sums do not depend on the order), then in key order.
    let mut out: crate::hash::FastMap<(&str, Period), PeriodCounts> = Default::default();
    for c in counts {
        let e = out.entry((&*c.entity, settings.period.of(c.date))).or_default();
        e.dates += 1;
        e.failures = e.failures.saturating_add(c.failures);
        e.infeasible = e.infeasible.saturating_add(c.infeasible);
    }
    out.into_iter().map(|((e, p), v)| ((e.to_string(), p), v)).collect()
}

/// A series entity's first or last curve in a part of a date range: its date and par spreads
/// by tenor (months). The daily move from the last curve of one part to the first of the next
/// is a move no part sees; the merge computes it from these ([`spread_move`]).
#[derive(Debug, Clone, PartialEq)]
pub struct SpreadEdge {
    pub entity: Arc<str>,
    pub date: NaiveDate,
    /// The last curve of the part (else the first).
    pub last: bool,
    pub spreads: BTreeMap<u32, f64>,
}

/// The market move of `entity` on `date`, from the par spreads of its previous curve to
/// those of this one: the mean absolute change over the tenors both quote, and the mean level
/// of today's spreads; None when they share no tenor.
pub fn spread_move(
    entity: &Arc<str>,
    date: NaiveDate,
    prev: &BTreeMap<u32, f64>,
    spreads: &BTreeMap<u32, f64>,
) -> Option<MarketMove> {
    // The changes summed as they are met (the same additions in the same order as summing
    // them gathered), without gathering them: this runs once per curve.
    let mut n = 0usize;
    let total: f64 = spreads.iter().filter_map(|(t, s)| prev.get(t).map(|p| (s - p).abs())).inspect(|_| n += 1).sum();
    if n == 0 {
        return None;
    }
    let level = spreads.values().sum::<f64>() / spreads.len() as f64;
    Some(MarketMove { entity: entity.clone(), date, mean_abs_change_bp: total / n as f64, mean_level_bp: level })
}

/// [`spread_move`] on spreads held as (tenor in months, spread) pairs in increasing tenor
/// order, one pair per tenor (a map's entries in its order): the same numbers, summed in the
/// same order, without building maps (this runs once per curve).
pub fn spread_move_sorted(
    entity: &Arc<str>,
    date: NaiveDate,
    prev: &[(u32, f64)],
    spreads: &[(u32, f64)],
) -> Option<MarketMove> {
    let (mut n, mut j) = (0usize, 0usize);
    let total: f64 = spreads
        .iter()
        .filter_map(|&(t, s)| {
            while j < prev.len() && prev[j].0 < t {
                j += 1;
            }
            (j < prev.len() && prev[j].0 == t).then(|| (s - prev[j].1).abs())
        })
        .inspect(|_| n += 1)
        .sum();
    if n == 0 {
        return None;
    }
    let level = spreads.iter().map(|&(_, s)| s).sum::<f64>() / spreads.len() as f64;
    Some(MarketMove { entity: entity.clone(), date, mean_abs_change_bp: total / n as f64, mean_level_bp: level })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Spreads (10 to 1,000 bp) at the tenors of 6M to 10Y, each tenor there with probability
    /// `quoted`.
    fn random_spreads(next: &mut dyn FnMut() -> f64, quoted: f64) -> BTreeMap<u32, f64> {
        let mut m = BTreeMap::new();
        for t in [6u32, 12, 24, 36, 60, 84, 120] {
            if next() < quoted {
                m.insert(t, 10f64.powf(1.0 + 2.0 * next()));
            }
        }
        m
    }

    /// The move on sorted pairs is the move on maps, bit for bit: tenor sets that overlap in
    /// part, in full and not at all, and empty ones.
    #[test]
    fn spread_move_on_sorted_pairs_is_the_map_form() {
        let mut rng = crate::sim::rng::Rng::new(11);
        let mut next = move || rng.uniform();
        let entity: Arc<str> = "Alder".into();
        let (mut some, mut none) = (0, 0);
        for _ in 0..2_000 {
            let (prev, now) = (random_spreads(&mut next, 0.6), random_spreads(&mut next, 0.6));
            let pairs = |m: &BTreeMap<u32, f64>| m.iter().map(|(&t, &s)| (t, s)).collect::<Vec<_>>();
            let want = spread_move(&entity, d("2024-01-02"), &prev, &now);
            let got = spread_move_sorted(&entity, d("2024-01-02"), &pairs(&prev), &pairs(&now));
            match (want, got) {
                (Some(w), Some(g)) => {
                    assert_eq!(w.mean_abs_change_bp.to_bits(), g.mean_abs_change_bp.to_bits());
                    assert_eq!(w.mean_level_bp.to_bits(), g.mean_level_bp.to_bits());
                    some += 1;
                }
                (None, None) => none += 1,
                (w, g) => panic!("{w:?} against {g:?}"),
            }
        }
        assert!(some > 1_000 && none > 10, "{some} {none}");
    }

    fn d(text: &str) -> NaiveDate {
        NaiveDate::parse_from_str(text, "%Y-%m-%d").unwrap()
    }

    fn obs(date: &str, value: f64) -> Observation {
        Observation { series: "pd_1y".into(), entity: "Alder".into(), grade: Some(3), date: d(date), value }
    }

    /// The mean change summed as the changes are met is the mean of the gathered changes, bit
    /// for bit: tenor sets that overlap in part, in full and not at all.
    #[test]
    fn spread_move_is_the_mean_of_the_gathered_changes() {
        let mut rng = crate::sim::rng::Rng::new(7);
        let mut next = move || rng.uniform();
        let entity: Arc<str> = "Alder".into();
        let mut compared = 0;
        for _ in 0..2_000 {
            let (prev, now) = (random_spreads(&mut next, 0.7), random_spreads(&mut next, 0.7));
            let changes: Vec<f64> = now.iter().filter_map(|(t, s)| prev.get(t).map(|p| (s - p).abs())).collect();
            let got = spread_move(&entity, d("2024-01-02"), &prev, &now);
            if changes.is_empty() {
                assert!(got.is_none());
                continue;
            }
            let want = changes.iter().sum::<f64>() / changes.len() as f64;
            assert_eq!(got.unwrap().mean_abs_change_bp.to_bits(), want.to_bits());
            compared += 1;
        }
        assert!(compared > 1_000, "{compared}");
    }

    #[test]
    fn panel_drops_bad_values_and_repeats() {
        let o =
            [obs("2024-01-03", 0.02), obs("2024-01-02", 0.01), obs("2024-01-03", 0.05), obs("2024-01-04", f64::NAN)];
        let (panel, s) = build_panel(&o);
        let pts = &panel[&("pd_1y".to_string(), "Alder".to_string())];
        assert_eq!(pts.iter().map(|p| p.value).collect::<Vec<_>>(), vec![0.01, 0.02]);
        assert_eq!(s, InputSummary { used: 2, non_finite: 1, duplicates: 1, market_unusable: 0 });
    }

    #[test]
    fn a_point_is_sixteen_bytes_and_keeps_its_grade() {
        assert_eq!(std::mem::size_of::<Point>(), 16);
        for g in [None, Some(0), Some(1), Some(6), Some(u32::MAX - 1)] {
            assert_eq!(Point::new(d("2024-01-05"), 1.0, g).grade(), g);
        }
    }

    #[test]
    fn gaps_break_the_chain() {
        // Fri 5 Jan -> Mon 8 Jan is 3 days (a move); 8 Jan -> 22 Jan is 14 days (no move).
        let pts: Vec<Point> = [("2024-01-05", 1.0), ("2024-01-08", 1.2), ("2024-01-22", 2.0), ("2024-01-23", 1.0)]
            .iter()
            .map(|&(t, v)| Point::new(d(t), v, None))
            .collect();
        let m = daily_moves(&pts, 5);
        assert_eq!(m.len(), 2);
        assert_eq!(m[0].date, d("2024-01-08"));
        assert!((m[0].abs_change() - 0.2).abs() < 1e-12);
        assert_eq!(m[1].abs_relative(), Some(0.5));
    }

    /// The period means summed by a hash of their keys are those of the ordered map they
    /// replaced, bit for bit (each key's moves added in the moves' order), with unusable moves
    /// counted; and the panel's histories put in order side by side are the one pass's.
    #[test]
    fn hashed_sums_and_parallel_histories_are_the_ordered_forms() {
        let mut rng = crate::sim::rng::Rng::new(3);
        let names: Vec<Arc<str>> = (0..40).map(|i| Arc::from(format!("Entity {i}"))).collect();
        let start = d("2019-01-01");
        let market: Vec<MarketMove> = (0..20_000)
            .map(|i| MarketMove {
                entity: names[(rng.uniform() * 40.0) as usize % 40].clone(),
                date: start + chrono::Days::new((rng.uniform() * 1500.0) as u64),
                mean_abs_change_bp: if i % 97 == 0 { f64::NAN } else { 10.0 * rng.uniform() },
                mean_level_bp: 50.0 + 300.0 * rng.uniform(),
            })
            .collect();
        let settings = StabilitySettings::default();
        let (got, unusable) = market_by_period(&market, &settings);
        let mut acc: BTreeMap<(&str, Period), (f64, usize)> = BTreeMap::new();
        for m in &market {
            if let Some(r) = m.relative() {
                let e = acc.entry((&*m.entity, settings.period.of(m.date))).or_default();
                e.0 += r;
                e.1 += 1;
            }
        }
        let want: Vec<((String, Period), u64)> =
            acc.into_iter().map(|((e, p), (s, n))| ((e.to_string(), p), (s / n as f64).to_bits())).collect();
        assert_eq!(got.into_iter().map(|(k, v)| (k, v.to_bits())).collect::<Vec<_>>(), want);
        assert_eq!(unusable, market.iter().filter(|m| m.relative().is_none()).count());

        let mut b = PanelBuilder::new();
        let series: Arc<str> = Arc::from("hazard_5y");
        for m in &market {
            b.push(&series, &m.entity, Some(2), m.date, m.mean_level_bp);
        }
        let mut want_panel: Panel = BTreeMap::new();
        let (mut used, mut duplicates) = (0, 0);
        for ((s, e), mut points) in b.histories.clone() {
            let before = points.len();
            points.sort_by_key(|p| p.date);
            points.dedup_by_key(|p| p.date);
            duplicates += before - points.len();
            used += points.len();
            want_panel.insert((s.to_string(), e.to_string()), points);
        }
        let (panel, summary) = b.finish();
        assert!(duplicates > 100);
        assert_eq!((summary.used, summary.duplicates), (used, duplicates));
        assert_eq!(panel, want_panel);
    }
}
