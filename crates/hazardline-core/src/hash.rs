//! FNV-1a, 64 bit (offset basis 14695981039346656037, prime 1099511628211): the one hash the
//! tool fixes itself. It places an entity in its shard (the same shard on every machine and
//! every version, which the standard library's hasher does not promise), and it keys the maps
//! that are asked once per input row or per curve, where SipHash costs several times more on
//! tens of millions of short keys. Not for adversarial keys, which these are not (they come
//! from the user's own files).

use std::collections::{HashMap, HashSet};
use std::hash::{BuildHasherDefault, Hasher};

const OFFSET_BASIS: u64 = 0xcbf2_9ce4_8422_2325;
const PRIME: u64 = 0x0100_0000_01b3;

/// FNV-1a of `bytes`, continued from the state `h`.
fn extend(mut h: u64, bytes: &[u8]) -> u64 {
    for &b in bytes {
        h ^= u64::from(b);
        h = h.wrapping_mul(PRIME);
    }
    h
}

/// FNV-1a 64 of `bytes`.
pub fn fnv1a(bytes: &[u8]) -> u64 {
    extend(OFFSET_BASIS, bytes)
}

/// FNV-1a as a [`Hasher`], for [`FastMap`] and [`FastSet`].
#[derive(Default, Clone, Copy)]
pub struct Fnv(u64);

impl Hasher for Fnv {
    fn write(&mut self, bytes: &[u8]) {
        let start = if self.0 == 0 { OFFSET_BASIS } else { self.0 };
        self.0 = extend(start, bytes);
    }
    fn finish(&self) -> u64 {
        self.0
    }
}

/// A HashMap with the FNV hasher.
pub type FastMap<K, V> = HashMap<K, V, BuildHasherDefault<Fnv>>;

/// A HashSet with the FNV hasher.
pub type FastSet<K> = HashSet<K, BuildHasherDefault<Fnv>>;

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn fnv1a_matches_the_published_test_vectors() {
        // Test vectors of the FNV reference (Fowler, Noll, Vo; the IETF draft
        // draft-eastlake-fnv): FNV-1a 64 of "", "a" and "foobar", recalled from memory (the
        // empty string's is the offset basis by definition).
        assert_eq!(fnv1a(b""), 0xcbf2_9ce4_8422_2325);
        assert_eq!(fnv1a(b"a"), 0xaf63_dc4c_8601_ec8c);
        assert_eq!(fnv1a(b"foobar"), 0x8594_4171_f739_67e8);
    }

    #[test]
    fn the_hasher_is_the_same_function() {
        let mut h = Fnv::default();
        h.write(b"foo");
        h.write(b"bar");
        assert_eq!(h.finish(), fnv1a(b"foobar"));
    }
}
