//! Reading input tables with polars and checking their data quality.
//!
//! `source` locates a table's files (one file, a folder, a hive-partitioned folder), checks the
//! schema up front, and hands batches of typed column views to the table readers. Each reader
//! turns rows into plain records or `Reject`s with a stable reason code and the source file and
//! 1-based row. `quality` runs the rules that need a whole series (duplicates, unit slips,
//! quotes after default, stale runs, spikes, curve shape) and the accounting.
//!
//! Invariants: rows in = rows used + rows rejected, per table; a flag never removes a row;
//! polars stops here (the core receives plain structs).

pub mod cds;
pub mod discount;
pub mod load;
pub mod quality;
pub mod source;
pub mod tables;

pub use load::{load, Dataset, InputPaths, TableCounts};
pub use quality::{QualityFlag, QualitySettings};
pub use source::{Cell, Reject};

use std::collections::HashMap;
use std::hash::{BuildHasherDefault, Hasher};

/// FNV-1a: a small, fast hash for the short keys (entity and currency names, tenors) looked
/// up once per input row; the default SipHash costs several times more on 40 million rows.
/// Not for untrusted adversarial keys, which these are not (they come from the user's files).
#[derive(Default, Clone, Copy)]
pub struct Fnv(u64);

impl Hasher for Fnv {
    fn write(&mut self, bytes: &[u8]) {
        let mut h = if self.0 == 0 { 0xcbf2_9ce4_8422_2325 } else { self.0 };
        for &b in bytes {
            h ^= b as u64;
            h = h.wrapping_mul(0x0000_0100_0000_01b3);
        }
        self.0 = h;
    }
    fn finish(&self) -> u64 {
        self.0
    }
}

/// A HashMap with the FNV hasher.
pub type FastMap<K, V> = HashMap<K, V, BuildHasherDefault<Fnv>>;

/// Maps names (entities, currencies, ...) to small integer ids so large panels hold no
/// repeated strings. Ids follow first appearance; `sorted_ids` gives name order.
#[derive(Debug, Clone, Default)]
pub struct Interner {
    map: FastMap<String, u32>,
    names: Vec<String>,
}

impl Interner {
    pub fn id(&mut self, name: &str) -> u32 {
        if let Some(&i) = self.map.get(name) {
            return i;
        }
        let i = self.names.len() as u32;
        self.names.push(name.to_string());
        self.map.insert(name.to_string(), i);
        i
    }

    pub fn get(&self, name: &str) -> Option<u32> {
        self.map.get(name).copied()
    }

    pub fn name(&self, id: u32) -> &str {
        &self.names[id as usize]
    }

    pub fn len(&self) -> usize {
        self.names.len()
    }

    pub fn is_empty(&self) -> bool {
        self.names.is_empty()
    }

    /// Rank of each id in name order (so outputs sort by name, not by first appearance).
    pub fn ranks(&self) -> Vec<u32> {
        let mut order: Vec<u32> = (0..self.names.len() as u32).collect();
        order.sort_by(|&a, &b| self.names[a as usize].cmp(&self.names[b as usize]));
        let mut rank = vec![0u32; order.len()];
        for (r, &id) in order.iter().enumerate() {
            rank[id as usize] = r as u32;
        }
        rank
    }
}
