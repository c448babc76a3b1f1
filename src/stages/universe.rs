//! `hazardline demo OUT_DIR`: writes the invented universe of [`crate::sim`] as the input
//! tables of the pipeline, the planted truth beside them under `truth/`, and a `pipeline.toml`
//! that runs the whole pipeline on that folder.
//!
//! Layout:
//! ```text
//! cds_quotes/quotes_<year>.parquet   the daily feed, one file per calendar year
//! cds_quotes/manual_entries.csv      rows typed in by hand (planted text and weekend faults)
//! cds_quotes/second_tier.parquet     a subordinated tier of a few names (one as quoted spreads)
//! discount.parquet (USD zero rates), rate_quotes.csv (EUR deposits and swaps),
//! bonds.csv, bond_quotes.csv, entities.csv, grades.csv, defaults.csv, cohort_history.csv
//! truth/grade_profiles.csv, truth/intensities.parquet (month ends), truth/defaults.csv,
//! truth/faults.csv, truth/bond_basis.csv, truth/cohort_pd.csv, truth/premium.csv,
//! truth/scenario.json
//! pipeline.toml
//! ```
//! Every file is written in a fixed order with fixed formatting, so a seed gives the same bytes.

use crate::error::{Error, Result};
use crate::sim::scenario::{QuoteFile, QuoteValue, Scenario};
use crate::sim::{generate, ScenarioSpec};
use crate::tables::parquet::{write_parquet, TableBuilder};
use crate::time::{DayCount, Tenor};
use chrono::{Datelike, NaiveDate};
use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};

/// What `demo` wrote.
#[derive(Debug, Clone)]
pub struct DemoSummary {
    pub out: PathBuf,
    pub files: Vec<PathBuf>,
    pub quotes: usize,
    pub entities: usize,
    pub defaults: usize,
    pub faults: usize,
}

fn tenor_text(months: u32) -> String {
    Tenor::from_months(months).map_or_else(|| format!("{months}M"), |t| t.to_string())
}

fn day_count_text(d: DayCount) -> &'static str {
    match d {
        DayCount::Act360 => "ACT/360",
        DayCount::Act365Fixed => "ACT/365F",
        DayCount::Thirty360 => "30/360",
        DayCount::ActActIcma => "ACT/ACT-ICMA",
    }
}

/// A CSV field, quoted when it holds a comma, a quote or a newline.
fn field(s: &str) -> String {
    if s.contains([',', '"', '\n']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

struct Writer {
    root: PathBuf,
    files: Vec<PathBuf>,
}

impl Writer {
    fn text(&mut self, rel: &str, body: &str) -> Result<()> {
        let path = self.root.join(rel);
        if let Some(dir) = path.parent() {
            std::fs::create_dir_all(dir)
                .map_err(|e| Error::Write { path: dir.to_path_buf(), message: e.to_string() })?;
        }
        std::fs::write(&path, body).map_err(|e| Error::Write { path: path.clone(), message: e.to_string() })?;
        self.files.push(path);
        Ok(())
    }

    fn parquet(&mut self, rel: &str, b: TableBuilder) -> Result<()> {
        let path = self.root.join(rel);
        let mut df = b.finish()?;
        write_parquet(&mut df, &path, &[])?;
        self.files.push(path);
        Ok(())
    }
}

/// Generates the universe for `spec` and writes it under `out`.
pub fn write_demo(out: &Path, spec: &ScenarioSpec) -> Result<DemoSummary> {
    write_scenario(out, &generate(spec))
}

/// Writes an already generated universe under `out`, with the second tier of a few names
/// ([`write_second_tier`]).
pub fn write_scenario(out: &Path, s: &Scenario) -> Result<DemoSummary> {
    write_scenario_tiers(out, s, true)
}

/// [`write_scenario`], the second tier written or not (the flag-rate universes have one tier:
/// one series per name).
pub fn write_scenario_tiers(out: &Path, s: &Scenario, second_tier: bool) -> Result<DemoSummary> {
    let mut w = Writer { root: out.to_path_buf(), files: Vec::new() };
    write_inputs(&mut w, s, second_tier)?;
    write_truth(&mut w, s)?;
    w.text("pipeline.toml", &pipeline_file(s))?;
    Ok(DemoSummary {
        out: out.to_path_buf(),
        files: w.files,
        quotes: s.quotes.len(),
        entities: s.entities.len(),
        defaults: s.defaults.len(),
        faults: s.faults.len(),
    })
}

fn write_inputs(w: &mut Writer, s: &Scenario, second_tier: bool) -> Result<()> {
    let name = |e: usize| s.entities[e].entity.as_str();
    // cds_quotes: one Parquet file per year, and the hand-typed CSV.
    let mut by_file: BTreeMap<QuoteFile, Vec<usize>> = BTreeMap::new();
    for (q, r) in s.quotes.iter().enumerate() {
        by_file.entry(r.file).or_default().push(q);
    }
    for (file, rows) in &by_file {
        let rel = format!("cds_quotes/{}", file.file_name());
        match file {
            QuoteFile::Year(_) => {
                let b = TableBuilder::new()
                    .dates("date", rows.iter().map(|&q| Some(s.quotes[q].date)))
                    .strings("entity", rows.iter().map(|&q| Some(name(s.quotes[q].entity))))
                    .strings("currency", rows.iter().map(|&q| Some(s.entities[s.quotes[q].entity].currency)))
                    .strings("tenor", rows.iter().map(|&q| Some(tenor_text(s.quotes[q].tenor))))
                    .floats(
                        "par_spread_bp",
                        rows.iter().map(|&q| match &s.quotes[q].value {
                            QuoteValue::Number(v) => Some(*v),
                            QuoteValue::Text(_) => None,
                        }),
                    );
                w.parquet(&rel, b)?;
            }
            QuoteFile::Manual => {
                let mut body = String::from("date,entity,currency,tenor,par_spread_bp\n");
                for &q in rows {
                    let r = &s.quotes[q];
                    let value = match &r.value {
                        QuoteValue::Number(v) => format!("{v}"),
                        QuoteValue::Text(t) => t.clone(),
                    };
                    let _ = writeln!(
                        body,
                        "{},{},{},{},{}",
                        r.date,
                        field(name(r.entity)),
                        s.entities[r.entity].currency,
                        tenor_text(r.tenor),
                        field(&value)
                    );
                }
                w.text(&rel, &body)?;
            }
        }
    }
    if second_tier {
        write_second_tier(w, s)?;
    }
    // Discount curves: zero rates by tenor, except for the currencies whose curves are given
    // as the deposit and swap quotes they imply (the standard curve, rebuilt by the run).
    let d: Vec<&(NaiveDate, &str, u32, f64)> =
        s.discount.iter().filter(|r| !RATE_QUOTE_CURRENCIES.contains(&r.1)).collect();
    w.parquet(
        "discount.parquet",
        TableBuilder::new()
            .dates("date", d.iter().map(|r| Some(r.0)))
            .strings("currency", d.iter().map(|r| Some(r.1)))
            .strings("tenor", d.iter().map(|r| Some(tenor_text(r.2))))
            .floats("zero_rate", d.iter().map(|r| Some(r.3))),
    )?;
    w.text("rate_quotes.csv", &rate_quotes_csv(s))?;
    // Entities, grades, defaults.
    let mut body = String::from("entity,name,sector,region,coverage_end\n");
    for e in &s.entities {
        let end = e.coverage_end.map_or(String::new(), |d| d.to_string());
        let _ = writeln!(body, "{},{},{},{},{end}", field(&e.entity), field(&e.name), e.sector, field(e.region));
    }
    w.text("entities.csv", &body)?;
    let mut body = String::from("entity,from_date,grade\n");
    for &(e, d, g) in &s.grades {
        let _ = writeln!(body, "{},{d},{g}", field(name(e)));
    }
    w.text("grades.csv", &body)?;
    let mut body = String::from("entity,default_date,event\n");
    for &(e, d, _) in &s.defaults {
        let _ = writeln!(body, "{},{d},failure to pay", field(name(e)));
    }
    w.text("defaults.csv", &body)?;
    // Bonds.
    let mut body = String::from("bond,entity,currency,coupon,frequency,maturity,day_count,issue_date\n");
    for b in &s.bonds {
        let t = &b.terms;
        let _ = writeln!(
            body,
            "{},{},{},{},{},{},{},{}",
            b.bond,
            field(name(b.entity)),
            s.entities[b.entity].currency,
            t.coupon,
            t.frequency,
            t.maturity,
            day_count_text(t.day_count),
            t.issue_date.map(|d| d.to_string()).unwrap_or_default()
        );
    }
    w.text("bonds.csv", &body)?;
    let mut body = String::from("date,bond,clean_price\n");
    for &(d, b, p) in &s.bond_quotes {
        let _ = writeln!(body, "{d},{},{p}", s.bonds[b].bond);
    }
    w.text("bond_quotes.csv", &body)?;
    let mut body = String::from("year,grade,obligors,defaults,withdrawn\n");
    for c in &s.cohort_history {
        let _ = writeln!(body, "{},{},{},{},{}", c.year, c.grade, c.obligors, c.defaults, c.withdrawn);
    }
    w.text("cohort_history.csv", &body)
}

/// The currencies whose discount curves the universe gives as deposit and swap quotes.
const RATE_QUOTE_CURRENCIES: [&str; 1] = ["EUR"];

/// The deposit and swap quotes of the standard curve (default conventions, weekends only)
/// that reprice each day's simulated zero curve of those currencies, rounded to 1e-6.
fn rate_quotes_csv(s: &Scenario) -> String {
    use crate::curves::rates::{par_rates, RateConvention, RateInstrument};
    use crate::curves::DiscountCurve;
    let cal = crate::time::Calendar::weekends_only();
    let instruments: Vec<(RateInstrument, Tenor)> = [1u32, 3, 6, 12]
        .iter()
        .map(|&m| (RateInstrument::Deposit, m))
        .chain([24u32, 36, 48, 60, 84, 120, 180, 240, 360].iter().map(|&m| (RateInstrument::Swap, m)))
        .filter_map(|(i, m)| Tenor::from_months(m).map(|t| (i, t)))
        .collect();
    let mut body = String::from("date,currency,instrument,tenor,rate\n");
    for ccy in RATE_QUOTE_CURRENCIES {
        let Some(conv) = RateConvention::default_for(ccy) else { continue };
        let rows: Vec<&(NaiveDate, &str, u32, f64)> = s.discount.iter().filter(|r| r.1 == ccy).collect();
        let mut i = 0;
        while i < rows.len() {
            let date = rows[i].0;
            let mut j = i;
            while j < rows.len() && rows[j].0 == date {
                j += 1;
            }
            let pillars: Vec<(Tenor, f64)> =
                rows[i..j].iter().filter_map(|r| Tenor::from_months(r.2).map(|t| (t, r.3))).collect();
            if let Ok(curve) = DiscountCurve::from_zero_rates(date, &pillars) {
                for ((instrument, tenor), rate) in
                    instruments.iter().zip(par_rates(date, &curve, &instruments, &conv, &cal))
                {
                    let _ = writeln!(
                        body,
                        "{date},{ccy},{},{},{:.6}",
                        instrument.as_str(),
                        tenor_text(tenor.months()),
                        rate
                    );
                }
            }
            i = j;
        }
    }
    body
}

fn write_truth(w: &mut Writer, s: &Scenario) -> Result<()> {
    let name = |e: usize| s.entities[e].entity.as_str();
    let mut body = String::from("grade,theta_p,multiplier,kappa,sigma_p,start_weight\n");
    for p in &s.profiles {
        let _ = writeln!(
            body,
            "{},{},{},{},{},{}",
            p.grade,
            p.theta_p,
            p.multiplier,
            crate::sim::credit::KAPPA,
            crate::sim::credit::sigma_for(p.theta_p),
            p.weight
        );
    }
    w.text("truth/grade_profiles.csv", &body)?;
    let it = &s.intensities;
    w.parquet(
        "truth/intensities.parquet",
        TableBuilder::new()
            .dates("date", it.iter().map(|r| Some(r.date)))
            .strings("entity", it.iter().map(|r| Some(name(r.entity))))
            .ints("grade", it.iter().map(|r| Some(r.grade as i64)))
            .floats("lambda_p", it.iter().map(|r| Some(r.lambda_p)))
            .floats("lambda_q", it.iter().map(|r| Some(r.lambda_q))),
    )?;
    let mut body = String::from("entity,default_date,grade_at_default\n");
    for &(e, d, g) in &s.defaults {
        let _ = writeln!(body, "{},{d},{g}", field(name(e)));
    }
    w.text("truth/defaults.csv", &body)?;
    // Planted instabilities (only when some were asked for: the demo plants none).
    if !s.instabilities.is_empty() {
        let mut body = String::from("instability,kind,entity,date,last_date\n");
        for (i, x) in s.instabilities.iter().enumerate() {
            let _ = writeln!(body, "{i},{},{},{},{}", x.kind, field(name(x.entity)), x.date, x.last_date);
        }
        w.text("truth/instabilities.csv", &body)?;
    }
    // Faults, one line per affected row, with the file and 1-based data row the quality stage
    // will name.
    let rows_of = fault_rows(s);
    let mut body = String::from("fault,kind,entity,date,last_date,tenor,expected,file,row,detail\n");
    for (i, f) in s.faults.iter().enumerate() {
        let tenor = f.tenor.map(tenor_text).unwrap_or_default();
        let rows = rows_of.get(&i).cloned().unwrap_or_default();
        if rows.is_empty() {
            let _ = writeln!(
                body,
                "{i},{},{},{},{},{tenor},{},,,{}",
                f.kind,
                field(name(f.entity)),
                f.date,
                f.last_date,
                f.expected,
                field(&f.detail)
            );
        }
        for (file, row) in rows {
            let _ = writeln!(
                body,
                "{i},{},{},{},{},{tenor},{},{file},{row},{}",
                f.kind,
                field(name(f.entity)),
                f.date,
                f.last_date,
                f.expected,
                field(&f.detail)
            );
        }
    }
    w.text("truth/faults.csv", &body)?;
    let mut body = String::from("bond,entity,basis_bp\n");
    for b in &s.bonds {
        let _ = writeln!(body, "{},{},{}", b.bond, field(name(b.entity)), b.basis_bp);
    }
    w.text("truth/bond_basis.csv", &body)?;
    let mut body = String::from("grade,horizon_years,members,hazard_q,hazard_p,planted_ratio,multiplier\n");
    for t in &s.premium {
        let _ = writeln!(
            body,
            "{},{},{},{},{},{},{}",
            t.grade,
            t.horizon_years,
            t.members,
            t.hazard_q,
            t.hazard_p,
            t.ratio(),
            t.multiplier
        );
    }
    w.text("truth/premium.csv", &body)?;
    let mut body = String::from("year,grade,pd\n");
    for c in &s.cohort_history {
        let _ = writeln!(body, "{},{},{}", c.year, c.grade, c.pd);
    }
    w.text("truth/cohort_pd.csv", &body)?;
    let sp = &s.spec;
    let json = serde_json::json!({
        "seed": sp.seed,
        "entities": sp.entities,
        "years": sp.years,
        "start": sp.start.to_string(),
        "end": sp.end().to_string(),
        "history_years": sp.history_years,
        "bond_share": sp.bond_share,
        "quote_noise": sp.quote_noise,
        "faults": sp.faults,
        "intensity_scale": sp.intensity_scale,
        "recovery": crate::sim::scenario::RECOVERY,
    });
    w.text("truth/scenario.json", &(serde_json::to_string_pretty(&json).unwrap_or_default() + "\n"))
}

/// The rows of each planted fault: (file relative to the scenario folder, 1-based data row).
pub fn fault_rows(s: &Scenario) -> BTreeMap<usize, Vec<(String, u64)>> {
    let mut rows_of: BTreeMap<usize, Vec<(String, u64)>> = BTreeMap::new();
    let mut counter: BTreeMap<QuoteFile, u64> = BTreeMap::new();
    for r in &s.quotes {
        let n = counter.entry(r.file).or_insert(0);
        *n += 1;
        if let Some(f) = r.fault {
            rows_of.entry(f).or_default().push((format!("cds_quotes/{}", r.file.file_name()), *n));
        }
    }
    rows_of
}

/// The pipeline file beside the generated tables: the whole pipeline on this folder.
/// Every `SECOND_TIER_EVERY`-th entity (from the 8th, leaving out the charted ones) is also
/// quoted in a second tier, `subordinated`.
const SECOND_TIER_EVERY: usize = 50;

/// Recovery the demo's pipeline file lists for the second tier's seniority.
const SECOND_TIER_RECOVERY: f64 = 0.20;

/// The second tier of the names [`SECOND_TIER_EVERY`] picks: each daily-feed par spread scaled
/// by (1 - 0.20) / (1 - 0.40), the spread of the same default risk at the lower recovery
/// (first order), rounded to 0.01 bp; the rows of planted faults are left out (the faults are
/// planted once, in the daily feed). The first such name is quoted as quoted spreads at a
/// 100 bp running coupon (500 bp from 300 bp of spread) instead of par spreads.
fn write_second_tier(w: &mut Writer, s: &Scenario) -> Result<()> {
    let charted = charted_entities(s);
    let names: Vec<usize> = (7..s.entities.len())
        .step_by(SECOND_TIER_EVERY)
        .filter(|&e| !charted.contains(&s.entities[e].entity.as_str()))
        .collect();
    let Some(&quoted) = names.first() else { return Ok(()) };
    let scale = (1.0 - SECOND_TIER_RECOVERY) / (1.0 - crate::sim::scenario::RECOVERY);
    let rows: Vec<(&crate::sim::scenario::QuoteRow, f64)> = s
        .quotes
        .iter()
        .filter(|r| matches!(r.file, QuoteFile::Year(_)) && r.fault.is_none() && names.contains(&r.entity))
        .filter_map(|r| match r.value {
            QuoteValue::Number(v) => Some((r, crate::sim::scenario::round_to(v * scale, 2))),
            QuoteValue::Text(_) => None,
        })
        .collect();
    let par = |r: &crate::sim::scenario::QuoteRow, v: f64| (r.entity != quoted).then_some(v);
    let qs = |r: &crate::sim::scenario::QuoteRow, v: f64| (r.entity == quoted).then_some(v);
    let b = TableBuilder::new()
        .dates("date", rows.iter().map(|(r, _)| Some(r.date)))
        .strings("entity", rows.iter().map(|(r, _)| Some(s.entities[r.entity].entity.as_str())))
        .strings("currency", rows.iter().map(|(r, _)| Some(s.entities[r.entity].currency)))
        .strings("tenor", rows.iter().map(|(r, _)| Some(tenor_text(r.tenor))))
        .strings("seniority", rows.iter().map(|_| Some("subordinated")))
        .floats("par_spread_bp", rows.iter().map(|&(r, v)| par(r, v)))
        .floats("quoted_spread_bp", rows.iter().map(|&(r, v)| qs(r, v)))
        .floats("coupon_bp", rows.iter().map(|&(r, v)| qs(r, v).map(|v| if v < 300.0 { 100.0 } else { 500.0 })));
    w.parquet("cds_quotes/second_tier.parquet", b)
}

/// The charted names: a good grade, a weak one and (when there is one) a defaulter.
fn charted_entities(s: &Scenario) -> Vec<&str> {
    let mut charted: Vec<&str> = Vec::new();
    let first_grade = |g: u32| s.grades.iter().find(|r| r.2 == g).map(|r| s.entities[r.0].entity.as_str());
    if let Some(e) = first_grade(1).or_else(|| first_grade(2)) {
        charted.push(e);
    }
    if let Some(e) = first_grade(5).or_else(|| first_grade(4)) {
        if !charted.contains(&e) {
            charted.push(e);
        }
    }
    if let Some(&(e, _, _)) = s.defaults.iter().find(|d| d.1.year() > s.spec.start.year()) {
        let e = s.entities[e].entity.as_str();
        if !charted.contains(&e) {
            charted.push(e);
        }
    }
    charted
}

fn pipeline_file(s: &Scenario) -> String {
    let charted: Vec<String> = charted_entities(s).iter().map(|e| format!("{e:?}")).collect();
    format!(
        "# Written by `hazardline demo` (seed {seed}): the whole pipeline on this invented universe.\n\
         name = \"demo\"\n\n\
         [inputs]\n\
         cds_quotes = \"cds_quotes\"\n\
         discount = \"discount.parquet\"\n\
         rate_quotes = \"rate_quotes.csv\"\n\
         bonds = \"bonds.csv\"\n\
         bond_quotes = \"bond_quotes.csv\"\n\
         entities = \"entities.csv\"\n\
         grades = \"grades.csv\"\n\
         defaults = \"defaults.csv\"\n\
         cohort_history = \"cohort_history.csv\"\n\n\
         [conventions]\n\
         recovery = {recovery:.2}\n\
         recovery_by_seniority = {{ subordinated = {second:.2} }}\n\n\
         [calibration]\n\
         bond_fit = true\n\
         cir = true\n\
         cir_mode = \"fixed_kappa_sigma\"\n\
         cir_entities = [{charted}]\n\n\
         [backtest]\n\
         horizons = [1, 3]\n\n\
         [report]\n\
         output_root = \"reports\"\n\
         label = \"seed-{seed}\"\n\
         charted_entities = [{charted}]\n",
        seed = s.spec.seed,
        recovery = crate::sim::scenario::RECOVERY,
        second = SECOND_TIER_RECOVERY,
        charted = charted.join(", "),
    )
}

/// Parses `YYYY-MM-DD` for the command line.
pub fn parse_start(text: &str) -> std::result::Result<NaiveDate, String> {
    crate::time::parse_iso_date(text).ok_or_else(|| format!("--start {text:?} is not an ISO date yyyy-mm-dd"))
}
