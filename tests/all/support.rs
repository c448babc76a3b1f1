//! Small helpers shared by the integration tests.

use chrono::NaiveDate;
use hazardline::calibrate::{bootstrap, BootstrapQuote, BootstrapSettings, CurveFit};
use hazardline::curves::DiscountCurve;
use hazardline::instruments::CdsQuote;
use hazardline::time::{Calendar, Tenor};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// The repository root.
pub fn repo() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// Every file under `dir` by relative path (with `/`), except those named in `skip`.
pub fn files(dir: &Path, skip: &[&str]) -> BTreeMap<String, Vec<u8>> {
    let mut out = BTreeMap::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        for e in std::fs::read_dir(&d).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                stack.push(p);
            } else {
                let rel = p.strip_prefix(dir).unwrap().to_string_lossy().replace('\\', "/");
                if !skip.contains(&rel.as_str()) {
                    out.insert(rel, std::fs::read(&p).unwrap());
                }
            }
        }
    }
    out
}

pub fn d(text: &str) -> NaiveDate {
    hazardline::time::parse_iso_date(text).unwrap_or_else(|| panic!("bad test date {text}"))
}

pub fn tenor(text: &str) -> Tenor {
    text.parse().unwrap()
}

/// Bootstraps par-spread quotes (bp) with one recovery.
pub fn fit(
    trade: NaiveDate,
    discount: &DiscountCurve,
    quotes: &[(&str, f64)],
    recovery: f64,
    settings: &BootstrapSettings,
) -> (CurveFit, Vec<BootstrapQuote>) {
    let qs: Vec<BootstrapQuote> = quotes
        .iter()
        .map(|&(t, bp)| BootstrapQuote {
            tenor: tenor(t),
            quote: CdsQuote::ParSpread(bp / 1e4),
            recovery,
            maturity: None,
        })
        .collect();
    let f = bootstrap(trade, &qs, discount, &Calendar::weekends_only(), settings).expect("bootstrap runs");
    (f, qs)
}

/// A typical upward discount curve on `trade`.
pub fn usd_like_curve(trade: NaiveDate) -> DiscountCurve {
    let pillars: Vec<(Tenor, f64)> = [
        ("1M", 0.031),
        ("3M", 0.0316),
        ("6M", 0.0322),
        ("1Y", 0.0331),
        ("2Y", 0.0342),
        ("5Y", 0.0364),
        ("10Y", 0.0383),
        ("30Y", 0.041),
    ]
    .iter()
    .map(|&(t, z)| (tenor(t), z))
    .collect();
    DiscountCurve::from_zero_rates(trade, &pillars).unwrap()
}

/// `bytes` with the build's source revision (printed by the manifest and the report after
/// `source revision ` and `"source_revision": "`) replaced by `REVISION`: a committed example
/// was written by the build of an earlier commit, and is otherwise compared byte for byte.
pub fn without_revision(bytes: &[u8]) -> Vec<u8> {
    let Ok(text) = std::str::from_utf8(bytes) else { return bytes.to_vec() };
    let mut out = String::with_capacity(text.len());
    let mut rest = text;
    let prefixes = ["source revision `", "source revision <code>", "\"source_revision\": \""];
    while let Some((at, p)) = prefixes.iter().filter_map(|p| rest.find(p).map(|i| (i, *p))).min() {
        out.push_str(&rest[..at + p.len()]);
        rest = &rest[at + p.len()..];
        let end = rest.find(|c: char| !(c.is_ascii_alphanumeric() || c == '-')).unwrap_or(rest.len());
        out.push_str("REVISION");
        rest = &rest[end..];
    }
    out.push_str(rest);
    out.into_bytes()
}

#[test]
fn revisions_are_normalised() {
    let text = "by hazardline 0.1.0 (source revision `0123abcd-modified`) x \"source_revision\": \"unknown\",\n";
    assert_eq!(
        String::from_utf8(without_revision(text.as_bytes())).unwrap(),
        "by hazardline 0.1.0 (source revision `REVISION`) x \"source_revision\": \"REVISION\",\n"
    );
}
