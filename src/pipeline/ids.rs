//! Byte strings (patient ids, episode keys) stored once in one arena, each
//! numbered by first appearance, with an open-addressing table of numbers
//! for lookup: about the bytes themselves plus 16 bytes per string, where a
//! boxed slice in a `Vec` and a hash map of boxed keys cost two allocations
//! and about 80 bytes more.

use crate::matcher::KeyHasher;
use std::hash::Hasher;

const EMPTY: u32 = u32::MAX;

/// Interned byte strings.
#[derive(Default)]
pub(crate) struct Ids {
    bytes: Vec<u8>,
    /// End of each string in `bytes` (the start is the previous end).
    ends: Vec<u64>,
    /// Numbers of the indexed strings; a power of two long, at most half
    /// full.
    slots: Vec<u32>,
    indexed: usize,
}

/// The hash a lookup of `b` starts from ([`Ids::intern_hashed`]): worth
/// computing ahead, on another thread, where many are looked up.
pub(crate) fn hash(b: &[u8]) -> u64 {
    let mut h = KeyHasher::default();
    h.write(b);
    // Mix the length in and spread the high bits down.
    let x = h.finish() ^ (b.len() as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15);
    x ^ (x >> 32)
}

impl Ids {
    /// Strings stored.
    pub fn len(&self) -> usize {
        self.ends.len()
    }

    /// String `i`.
    pub fn get(&self, i: u32) -> &[u8] {
        let i = i as usize;
        let start = if i == 0 { 0 } else { self.ends[i - 1] as usize };
        &self.bytes[start..self.ends[i] as usize]
    }

    /// Bytes held (arena, ends and table).
    pub fn heap_bytes(&self) -> usize {
        self.bytes.capacity() + self.ends.capacity() * 8 + self.slots.capacity() * 4
    }

    /// Stores `b` without indexing it (it is never looked up); returns its
    /// number.
    pub fn push(&mut self, b: &[u8]) -> u32 {
        self.bytes.extend_from_slice(b);
        self.ends.push(self.bytes.len() as u64);
        (self.ends.len() - 1) as u32
    }

    /// The number of `b`, stored and indexed first if new; the flag says
    /// whether it was new.
    pub fn intern(&mut self, b: &[u8]) -> (u32, bool) {
        self.intern_hashed(b, hash(b))
    }

    /// [`Ids::intern`] with `h`, which must be [`hash`]`(b)`.
    pub fn intern_hashed(&mut self, b: &[u8], h: u64) -> (u32, bool) {
        debug_assert_eq!(h, hash(b));
        if (self.indexed + 1) * 2 > self.slots.len() {
            self.grow();
        }
        let mask = self.slots.len() - 1;
        let mut at = h as usize & mask;
        loop {
            match self.slots[at] {
                EMPTY => {
                    let i = self.push(b);
                    self.slots[at] = i;
                    self.indexed += 1;
                    return (i, true);
                }
                i if self.get(i) == b => return (i, false),
                _ => at = (at + 1) & mask,
            }
        }
    }

    /// Asks the processor to fetch what a lookup of the string of hash `h`
    /// a few rows later reads, so that it does not wait for memory (the
    /// table, ends and bytes of a large history are far larger than the
    /// caches), in three steps some rows apart: `0` the table slot where
    /// the lookup starts; `1` (the slot fetched by then) the end of the
    /// string it holds; `2` (that fetched too) the string's bytes.
    #[inline]
    pub fn prefetch(&self, h: u64, step: u8) {
        if self.slots.is_empty() {
            return;
        }
        let at = h as usize & (self.slots.len() - 1);
        let p: *const u8 = match step {
            0 => self.slots[at..].as_ptr().cast(),
            _ => {
                let i = self.slots[at];
                if i == EMPTY {
                    return;
                }
                let i = i as usize;
                let before = i.saturating_sub(1);
                if step == 1 {
                    self.ends[before..].as_ptr().cast()
                } else {
                    let start = if i == 0 {
                        0
                    } else {
                        self.ends[before] as usize
                    };
                    match self.bytes.get(start..) {
                        Some(b) => b.as_ptr(),
                        None => return,
                    }
                }
            }
        };
        #[cfg(target_arch = "x86_64")]
        {
            // SAFETY: a prefetch is a hint; `p` points into `slots`,
            // `ends` or `bytes`.
            #[allow(unused_unsafe)]
            unsafe {
                std::arch::x86_64::_mm_prefetch::<{ std::arch::x86_64::_MM_HINT_T0 }>(p.cast())
            };
        }
        #[cfg(not(target_arch = "x86_64"))]
        let _ = p;
    }

    fn grow(&mut self) {
        let size = (self.slots.len() * 2).max(16);
        let mut slots = vec![EMPTY; size];
        let mask = size - 1;
        for &i in self.slots.iter().filter(|&&i| i != EMPTY) {
            let mut at = hash(self.get(i)) as usize & mask;
            while slots[at] != EMPTY {
                at = (at + 1) & mask;
            }
            slots[at] = i;
        }
        self.slots = slots;
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::collections::HashMap;

    #[test]
    fn numbers_follow_first_appearance_and_lookups_find_them() {
        let mut ids = Ids::default();
        // Nothing held yet.
        ids.prefetch(hash(b"x"), 0);
        let mut reference: HashMap<Vec<u8>, u32> = HashMap::new();
        let mut order: Vec<Vec<u8>> = Vec::new();
        // Many strings, repeated, of several lengths (the empty one too),
        // with strings pushed unindexed in between.
        for k in 0..20_000u32 {
            let v = (k * 7919 % 5003).to_string().into_bytes();
            let v = if k % 97 == 0 { Vec::new() } else { v };
            if k % 13 == 0 {
                let i = ids.push(&v);
                assert_eq!(i as usize, order.len());
                order.push(v);
                continue;
            }
            // Fetching ahead, in every step, for strings held or not, is
            // only a hint; a lookup from a hash made ahead finds the same.
            let h = hash(&v);
            for step in 0..3 {
                ids.prefetch(h, step);
            }
            let (i, fresh) = if k % 2 == 0 {
                ids.intern(&v)
            } else {
                ids.intern_hashed(&v, h)
            };
            match reference.get(&v) {
                Some(&j) => {
                    assert!(!fresh);
                    assert_eq!(i, j);
                }
                None => {
                    assert!(fresh);
                    assert_eq!(i as usize, order.len());
                    reference.insert(v.clone(), i);
                    order.push(v);
                }
            }
        }
        assert_eq!(ids.len(), order.len());
        for (i, v) in order.iter().enumerate() {
            assert_eq!(ids.get(i as u32), &v[..]);
        }
    }
}
