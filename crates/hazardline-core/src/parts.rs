//! How a universe splits into parts that are computed apart and merged: entity shards (a
//! fixed hash of the entity's name), curve-date ranges, and the check that the ranges of a set
//! of parts cover every date exactly once. Pure: the run layer of the application cuts the
//! data and writes the part folders.

use crate::hash::fnv1a;
use chrono::NaiveDate;

/// Shard `index` of `count` (1-based): the entities whose name hashes to it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Shard {
    pub index: u32,
    pub count: u32,
}

impl Shard {
    /// The whole universe in one piece.
    pub const ALL: Shard = Shard { index: 1, count: 1 };

    /// Parses `I/N` with 1 <= I <= N.
    pub fn parse(s: &str) -> std::result::Result<Shard, String> {
        let (i, n) = s.split_once('/').ok_or_else(|| format!("shard `{s}`: expected I/N, e.g. 2/8"))?;
        let index: u32 = i.trim().parse().map_err(|_| format!("shard `{s}`: `{i}` is not a whole number"))?;
        let count: u32 = n.trim().parse().map_err(|_| format!("shard `{s}`: `{n}` is not a whole number"))?;
        if count == 0 || index == 0 || index > count {
            return Err(format!("shard `{s}`: I must be between 1 and N (N >= 1)"));
        }
        Ok(Shard { index, count })
    }

    /// Whether `entity` belongs to this shard: FNV-1a (64 bit) of its UTF-8 bytes, modulo the
    /// shard count. The hash is fixed here (not the standard library's, which may change), so
    /// an entity lands in the same shard on every machine and every version.
    pub fn owns(&self, entity: &str) -> bool {
        self.count == 1 || (fnv1a(entity.as_bytes()) % u64::from(self.count)) as u32 == self.index - 1
    }

    /// The folder name of this shard's partition, e.g. `part-0002-of-0008`.
    pub fn folder(&self) -> String {
        format!("part-{:04}-of-{:04}", self.index, self.count)
    }

    /// The first shard also carries what every shard computes alike (the discount curves and
    /// the discount table's calibration rejects).
    pub fn is_first(&self) -> bool {
        self.index == 1
    }
}

impl std::fmt::Display for Shard {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}/{}", self.index, self.count)
    }
}

/// The curve dates a part calibrates and writes: `FROM..TO`, both ends included, either end
/// open (`..2016-12-31`, `2017-01-01..`); the whole history when both are open.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct DateRange {
    pub from: Option<NaiveDate>,
    pub to: Option<NaiveDate>,
}

impl DateRange {
    /// Every date.
    pub const ALL: DateRange = DateRange { from: None, to: None };

    /// Parses `FROM..TO` (ISO dates, either side may be left empty, FROM <= TO).
    pub fn parse(s: &str) -> std::result::Result<DateRange, String> {
        let (a, b) = s.split_once("..").ok_or_else(|| {
            format!("dates `{s}`: expected FROM..TO, e.g. 2015-01-01..2016-12-31 (either end may be left out)")
        })?;
        let date = |x: &str| -> std::result::Result<Option<NaiveDate>, String> {
            let x = x.trim();
            if x.is_empty() {
                return Ok(None);
            }
            NaiveDate::parse_from_str(x, "%Y-%m-%d")
                .map(Some)
                .map_err(|_| format!("dates `{s}`: `{x}` is not a date (YYYY-MM-DD)"))
        };
        let r = DateRange { from: date(a)?, to: date(b)? };
        if let (Some(f), Some(t)) = (r.from, r.to) {
            if f > t {
                return Err(format!("dates `{s}`: {f} is after {t}"));
            }
        }
        Ok(r)
    }

    pub fn contains(&self, d: NaiveDate) -> bool {
        self.from.is_none_or(|f| d >= f) && self.to.is_none_or(|t| d <= t)
    }

    pub fn is_all(&self) -> bool {
        self.from.is_none() && self.to.is_none()
    }

    /// The part folder's suffix: empty for the whole history, else e.g.
    /// `-from-2017-01-01-to-end`.
    pub fn folder_suffix(&self) -> String {
        if self.is_all() {
            return String::new();
        }
        let show = |d: Option<NaiveDate>, open: &str| d.map_or(open.to_string(), |d| d.to_string());
        format!("-from-{}-to-{}", show(self.from, "start"), show(self.to, "end"))
    }
}

impl std::fmt::Display for DateRange {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let show = |d: Option<NaiveDate>| d.map_or(String::new(), |d| d.to_string());
        write!(f, "{}..{}", show(self.from), show(self.to))
    }
}

/// What a part knows beyond its own entities and dates: its date range, and the run's outcome
/// end (the backtest observes defaults up to it), a fact of the whole input.
#[derive(Debug, Clone, Default)]
pub struct DateScope {
    pub range: DateRange,
    /// The configured outcome end, else the last quote date of the whole input.
    pub outcome_end: Option<NaiveDate>,
}

/// Whether the date ranges of one shard's parts (in date order, an open start first) cover
/// every date once: the first open at the start, the last open at the end, each starting the
/// day after the one before ends.
pub fn check_tiling(ranges: &[DateRange]) -> std::result::Result<(), String> {
    let mut next: Option<Option<chrono::NaiveDate>> = Some(None);
    for r in ranges {
        let Some(expected) = next else {
            return Err(format!("the part of {r} comes after a part open at the end (the dates overlap); keep one"));
        };
        if r.from != expected {
            return Err(match (expected, r.from) {
                (None, Some(f)) => format!("no part covers the dates before {f}; run a part with --dates ..{}", f.pred_opt().unwrap_or(f)),
                (Some(e), Some(f)) if f > e => format!("no part covers {e}..{}; run a part with those dates", f.pred_opt().unwrap_or(f)),
                _ => format!("the part of {r} overlaps the part before it (a part's dates start the day after the last part's end); keep one set of parts"),
            });
        }
        next = r.to.map(|t| t.succ_opt());
        if r.to.is_some() && next == Some(None) {
            return Err(format!("the part of {r} ends on the last date there is"));
        }
    }
    match next {
        None => Ok(()),
        Some(Some(d)) => Err(format!("no part covers the dates from {d} on; run a part with --dates {d}..")),
        Some(None) => Err("no part".into()),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shard_parsing_and_errors() {
        assert_eq!(Shard::parse("2/8"), Ok(Shard { index: 2, count: 8 }));
        assert!(Shard::parse("0/8").is_err());
        assert!(Shard::parse("9/8").is_err());
        assert!(Shard::parse("1/0").is_err());
        assert!(Shard::parse("3").is_err());
        assert!(Shard::parse("a/2").is_err());
        assert_eq!(Shard { index: 3, count: 12 }.folder(), "part-0003-of-0012");
    }

    #[test]
    fn date_ranges_parse_contain_and_name_their_folder() {
        let d = |s: &str| NaiveDate::parse_from_str(s, "%Y-%m-%d").unwrap();
        let r = DateRange::parse("2015-01-01..2016-12-31").unwrap();
        assert_eq!(r, DateRange { from: Some(d("2015-01-01")), to: Some(d("2016-12-31")) });
        assert!(
            r.contains(d("2015-01-01"))
                && r.contains(d("2016-12-31"))
                && !r.contains(d("2017-01-01"))
                && !r.contains(d("2014-12-31"))
        );
        assert_eq!(r.folder_suffix(), "-from-2015-01-01-to-2016-12-31");
        let open = DateRange::parse("..2016-12-31").unwrap();
        assert_eq!((open.from, open.to.is_some()), (None, true));
        assert_eq!(open.folder_suffix(), "-from-start-to-2016-12-31");
        assert_eq!(open.to_string(), "..2016-12-31");
        assert!(DateRange::parse("..").unwrap().is_all());
        assert_eq!(DateRange::parse("..").unwrap().folder_suffix(), "");
        assert!(DateRange::parse("2016-01-02..2016-01-01").is_err());
        assert!(DateRange::parse("2016-01-02").is_err());
        assert!(DateRange::parse("2016-02-30..").is_err());
    }

    #[test]
    fn every_entity_is_in_exactly_one_shard() {
        for n in 1..=7u32 {
            let shards: Vec<Shard> = (1..=n).map(|i| Shard { index: i, count: n }).collect();
            for k in 0..500 {
                let e = format!("Entity {k}");
                assert_eq!(shards.iter().filter(|s| s.owns(&e)).count(), 1, "{e} with {n} shards");
            }
        }
        // Spread: 4 shards of 2,000 names each get between 400 and 600.
        let counts: Vec<usize> = (1..=4)
            .map(|i| (0..2000).filter(|k| Shard { index: i, count: 4 }.owns(&format!("N{k:05}"))).count())
            .collect();
        assert!(counts.iter().all(|&c| (400..=600).contains(&c)), "{counts:?}");
    }

    #[test]
    fn date_ranges_must_cover_every_date_once() {
        let r = |s: &str| DateRange::parse(s).unwrap();
        assert_eq!(check_tiling(&[r("..")]), Ok(()));
        assert_eq!(check_tiling(&[r("..2015-12-31"), r("2016-01-01..2016-06-30"), r("2016-07-01..")]), Ok(()));
        let err = |v: &[DateRange]| check_tiling(v).unwrap_err();
        assert!(err(&[]).contains("no part"));
        assert!(err(&[r("2015-01-01..")]).contains("before 2015-01-01"));
        assert!(err(&[r("..2015-12-31")]).contains("from 2016-01-01 on"));
        assert!(err(&[r("..2015-12-31"), r("2016-01-03..")]).contains("no part covers 2016-01-01..2016-01-02"));
        assert!(err(&[r("..2015-12-31"), r("2015-12-31..")]).contains("overlaps"));
        assert!(err(&[r(".."), r("..")]).contains("open at the end"));
        assert!(err(&[r(".."), r("2016-01-01..")]).contains("open at the end"));
    }
}
