//! The matcher: from a normalised code to the conditions it claims, over a
//! set of lists at once.
//!
//! Every `code` entry of every selected list is expanded (ranges into their
//! codes) into prefix keys. Three-character prefixes live in a dense table
//! indexed by the characters themselves (26 × 10 × 36 slots); longer prefixes
//! live in a hash map keyed by the packed prefix. Looking a code up costs one
//! array read plus one hash probe per longer prefix length that the lists
//! use, and allocates nothing.

use std::collections::HashMap;
use std::hash::{BuildHasherDefault, Hasher};

use crate::code::{expand_range, pack, Code, MAX_CODE_LEN, MIN_CODE_LEN};
use crate::lists::parse::MAX_RANGE_CODES;
use crate::lists::CodeList;

/// Multiply-shift hasher for packed code keys (they are already well mixed
/// by construction; this spreads them over the table).
#[derive(Default)]
pub struct KeyHasher(u64);

impl Hasher for KeyHasher {
    fn finish(&self) -> u64 {
        self.0
    }
    fn write(&mut self, bytes: &[u8]) {
        for &b in bytes {
            self.0 = (self.0.rotate_left(5) ^ b as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15);
        }
    }
    fn write_u64(&mut self, k: u64) {
        let x = (k ^ (k >> 31)).wrapping_mul(0x9E37_79B9_7F4A_7C15);
        self.0 = x ^ (x >> 29);
    }
}

type KeyMap<V> = HashMap<u64, V, BuildHasherDefault<KeyHasher>>;

const SLOTS: usize = 26 * 10 * 36;

/// A digit or capital letter as 0-35 (digits first).
#[inline]
pub(crate) fn alnum36(c: u8) -> usize {
    if c.is_ascii_digit() {
        (c - b'0') as usize
    } else {
        (c - b'A') as usize + 10
    }
}

/// The slot of a category (its first three characters: letter, digit,
/// digit or letter), from 0 to 26 × 10 × 36 − 1.
#[inline]
pub(crate) fn slot(code: &[u8]) -> usize {
    ((code[0] - b'A') as usize * 10 + (code[1] - b'0') as usize) * 36 + alnum36(code[2])
}

/// Condition ids are global over the selected lists: list `i`'s condition
/// `c` is `offsets[i] + c`.
#[derive(Clone, Debug)]
pub struct Matcher {
    /// Per three-character slot: range into `hits`.
    dense: Vec<(u32, u32)>,
    /// Per three-character slot: whether any longer prefix starts with it.
    has_longer: Vec<bool>,
    longer: KeyMap<(u32, u32)>,
    /// Bit `n` set when some entry has `n` characters (n > 3).
    longer_lengths: u8,
    hits: Vec<u16>,
}

impl Matcher {
    /// Builds the index over `lists`, numbering their conditions one after
    /// the other in the given order.
    pub fn new(lists: &[&CodeList]) -> Matcher {
        let mut by_key: KeyMap<Vec<u16>> = KeyMap::default();
        let mut offset = 0usize;
        for list in lists {
            for entry in &list.codes {
                let id = (offset + entry.condition) as u16;
                let last = entry.last.unwrap_or(entry.first);
                expand_range(&entry.first, &last, MAX_RANGE_CODES, |c| {
                    by_key.entry(c.prefix_key(c.len())).or_default().push(id);
                });
            }
            offset += list.conditions.len();
        }
        let mut dense = vec![(0u32, 0u32); SLOTS];
        let mut has_longer = vec![false; SLOTS];
        let mut longer = KeyMap::default();
        let mut longer_lengths = 0u8;
        let mut hits = Vec::new();
        let mut keys: Vec<u64> = by_key.keys().copied().collect();
        keys.sort_unstable();
        for key in keys {
            let mut ids = by_key.remove(&key).unwrap_or_default();
            ids.sort_unstable();
            ids.dedup();
            let start = hits.len() as u32;
            hits.extend_from_slice(&ids);
            let range = (start, ids.len() as u32);
            let len = (key & 0xff) as usize;
            let mut chars = [0u8; MAX_CODE_LEN];
            for (i, c) in chars.iter_mut().enumerate().take(len) {
                *c = (key >> (8 * (i + 1))) as u8;
            }
            let s = slot(&chars);
            if len == MIN_CODE_LEN {
                dense[s] = range;
            } else {
                has_longer[s] = true;
                longer_lengths |= 1 << len;
                longer.insert(key, range);
            }
        }
        Matcher {
            dense,
            has_longer,
            longer,
            longer_lengths,
            hits,
        }
    }

    /// Calls `f` with every global condition id the code claims. An id may
    /// come more than once when entries of several lengths claim the code.
    #[inline]
    pub fn for_each_hit(&self, code: &Code, mut f: impl FnMut(u16)) {
        let b = code.as_bytes();
        let s = slot(b);
        let (start, n) = self.dense[s];
        for &id in &self.hits[start as usize..(start + n) as usize] {
            f(id);
        }
        if self.has_longer[s] {
            for len in MIN_CODE_LEN + 1..=code.len() {
                if self.longer_lengths & (1 << len) == 0 {
                    continue;
                }
                if let Some(&(start, n)) = self.longer.get(&pack(&b[..len])) {
                    for &id in &self.hits[start as usize..(start + n) as usize] {
                        f(id);
                    }
                }
            }
        }
    }

    /// Number of distinct prefix keys in the index.
    pub fn prefixes(&self) -> usize {
        self.dense.iter().filter(|r| r.1 > 0).count() + self.longer.len()
    }
}
