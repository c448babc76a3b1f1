//! Invented entity names, sectors and regions for the demo universe. Names are built from
//! syllables that read as fictional; a fixed list of suffixes gives them a trade. Nothing here
//! is, or is meant to resemble, a real company, place or person.

use super::rng::Rng;

const FIRST: [&str; 24] = [
    "Bra", "Cor", "Dal", "Ens", "Fen", "Gav", "Hol", "Isk", "Jor", "Kel", "Lom", "Mar", "Nev", "Orv", "Pel", "Quen",
    "Ros", "Sal", "Tav", "Ulm", "Var", "Wen", "Yst", "Zel",
];
const MIDDLE: [&str; 12] = ["a", "e", "i", "o", "u", "ar", "en", "il", "or", "ur", "ae", "io"];
const LAST: [&str; 16] = [
    "vane", "thorp", "mere", "dell", "brook", "quist", "ford", "hallow", "wick", "stead", "gard", "moor", "lund",
    "croft", "vale", "ness",
];
const TRADE: [&str; 12] = [
    "Freight",
    "Mills",
    "Foods",
    "Power",
    "Works",
    "Textiles",
    "Telecom",
    "Chemicals",
    "Metals",
    "Retail",
    "Shipping",
    "Timber",
];

/// Invented sectors, each with the trade words that belong to it.
pub const SECTORS: [(&str, &[usize]); 6] = [
    ("transport", &[0, 10]),
    ("consumer", &[2, 5, 9]),
    ("utilities", &[3]),
    ("industrials", &[1, 4, 11]),
    ("communications", &[6]),
    ("materials", &[7, 8]),
];

/// Invented regions.
pub const REGIONS: [&str; 5] = ["Northmarch", "Calder Coast", "Eastern Reach", "Vell Basin", "Southern Isles"];

/// A name, sector and region for entity `index`, unique within a scenario because the index is
/// appended in the rare case of a clash (the caller keeps the set of used names).
pub fn invent(rng: &mut Rng, used: &mut std::collections::BTreeSet<String>) -> (String, &'static str, &'static str) {
    let sector = rng.below(SECTORS.len() as u64) as usize;
    let (sector_name, trades) = SECTORS[sector];
    let trade = TRADE[trades[rng.below(trades.len() as u64) as usize]];
    let region = REGIONS[rng.below(REGIONS.len() as u64) as usize];
    let mut attempt = 0u64;
    loop {
        let stem = format!(
            "{}{}{}",
            FIRST[rng.below(FIRST.len() as u64) as usize],
            MIDDLE[rng.below(MIDDLE.len() as u64) as usize],
            LAST[rng.below(LAST.len() as u64) as usize]
        );
        let name = if attempt < 8 { format!("{stem} {trade}") } else { format!("{stem} {trade} {attempt}") };
        if used.insert(name.clone()) {
            return (name, sector_name, region);
        }
        attempt += 1;
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_are_unique_and_reproducible() {
        let draw = || {
            let mut rng = Rng::new(11);
            let mut used = std::collections::BTreeSet::new();
            (0..500).map(|_| invent(&mut rng, &mut used).0).collect::<Vec<_>>()
        };
        let a = draw();
        assert_eq!(a, draw());
        let set: std::collections::BTreeSet<_> = a.iter().collect();
        assert_eq!(set.len(), a.len());
    }
}
