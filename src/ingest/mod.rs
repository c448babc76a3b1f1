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
pub mod files;
pub mod load;
pub mod parquet_check;
pub mod quality;
pub mod rates;
pub mod source;
pub mod tables;

pub use load::{load, Dataset, InputPaths, TableCounts};
pub use quality::{QualityFlag, QualitySettings};
pub use source::{Cell, Reject};

pub use crate::hash::{FastMap, Fnv};

/// Maps names (entities, currencies, ...) to small integer ids so large panels hold no
/// repeated strings. Ids follow first appearance; `sorted_ids` gives name order.
#[derive(Debug, Clone, Default)]
pub struct Interner {
    map: FastMap<String, u32>,
    names: Vec<String>,
    /// The id last handed out: a panel's rows come in runs of one name (an entity's tenors,
    /// one currency), so most look-ups are a comparison with it rather than a hash.
    last: Option<u32>,
}

impl Interner {
    pub fn id(&mut self, name: &str) -> u32 {
        if let Some(i) = self.last {
            if self.names[i as usize] == name {
                return i;
            }
        }
        let i = match self.map.get(name) {
            Some(&i) => i,
            None => {
                let i = self.names.len() as u32;
                self.names.push(name.to_string());
                self.map.insert(name.to_string(), i);
                i
            }
        };
        self.last = Some(i);
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
