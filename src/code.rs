//! Reading ICD-10 codes as they appear in extracts.
//!
//! A diagnosis field is trimmed, upper-cased and stripped of dots, inner
//! spaces, dagger/asterisk marks (`†`, `+`, `*`), trailing `-` and a trailing
//! `X` filler after a three-character category (`I10X` is `I10`). What remains
//! must be ICD-10-shaped: 3 to 7 ASCII letters or digits, the first a letter,
//! the second a digit and the third a digit or a letter. Anything else is an
//! *invalid code*: it scores nothing and is counted by the caller.
//!
//! The reader works on bytes, never allocates, and packs a code into a `u64`
//! key so that the matcher can look up prefixes without building strings.

/// Longest code kept (ICD-10-CM codes have 7 characters).
pub const MAX_CODE_LEN: usize = 7;
/// Shortest valid code (an ICD-10 category).
pub const MIN_CODE_LEN: usize = 3;
/// Longest raw field the reader looks at; longer fields are invalid codes.
const MAX_RAW_LEN: usize = 64;

/// A normalised ICD-10 code: up to seven upper-case ASCII characters.
#[derive(Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct Code {
    bytes: [u8; MAX_CODE_LEN],
    len: u8,
}

impl Code {
    /// The normalised characters, e.g. `b"I509"`.
    pub fn as_bytes(&self) -> &[u8] {
        &self.bytes[..self.len as usize]
    }

    /// The normalised code as text.
    pub fn as_str(&self) -> &str {
        // Only ASCII letters and digits are ever stored.
        std::str::from_utf8(self.as_bytes()).unwrap_or("")
    }

    /// A code from its normalised characters (as [`Code::as_bytes`] gives
    /// them), e.g. read back from a temporary file; `None` when they do not
    /// fit.
    pub(crate) fn from_normalised(chars: &[u8]) -> Option<Code> {
        if chars.len() < MIN_CODE_LEN || chars.len() > MAX_CODE_LEN {
            return None;
        }
        let mut bytes = [0u8; MAX_CODE_LEN];
        bytes[..chars.len()].copy_from_slice(chars);
        Some(Code {
            bytes,
            len: chars.len() as u8,
        })
    }

    /// Number of characters (3 to 7).
    pub fn len(&self) -> usize {
        self.len as usize
    }

    /// Always false: a code has at least three characters.
    pub fn is_empty(&self) -> bool {
        self.len == 0
    }

    /// Packed key of the first `n` characters (`n <= len`), as used by the
    /// matcher. Distinct prefixes of any length give distinct keys.
    #[inline]
    pub fn prefix_key(&self, n: usize) -> u64 {
        pack(&self.bytes[..n])
    }
}

impl std::fmt::Debug for Code {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "Code({})", self.as_str())
    }
}

impl std::fmt::Display for Code {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

/// Packs up to seven ASCII bytes and their count into one `u64`.
#[inline]
pub fn pack(chars: &[u8]) -> u64 {
    let mut key = chars.len() as u64;
    for (i, &c) in chars.iter().enumerate() {
        key |= (c as u64) << (8 * (i + 1));
    }
    key
}

/// What a diagnosis field holds once read.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Reading {
    /// Nothing but spaces and marks: not a code, not an error.
    Empty,
    /// An ICD-10-shaped code.
    Valid(Code),
    /// Something that is not ICD-10-shaped.
    Invalid,
}

/// Reads one diagnosis value.
///
/// ```
/// use morbus::code::{read_code, Reading};
/// let Reading::Valid(c) = read_code(b" i50.9 ") else { panic!() };
/// assert_eq!(c.as_str(), "I509");
/// assert_eq!(read_code(b"I10X"), read_code(b"I10"));
/// assert_eq!(read_code(b"N/A"), Reading::Invalid);
/// assert_eq!(read_code(b"  "), Reading::Empty);
/// ```
#[inline]
pub fn read_code(raw: &[u8]) -> Reading {
    // Fast path for the usual spellings: upper-case letters and digits with
    // at most a dot after the category (`I509`, `I50.9`, `S72.001A`).
    if (MIN_CODE_LEN..=MAX_CODE_LEN + 1).contains(&raw.len()) {
        let mut bytes = [0u8; MAX_CODE_LEN];
        let mut len = 0usize;
        let mut clean = true;
        for (i, &b) in raw.iter().enumerate() {
            if (b.is_ascii_digit() || b.is_ascii_uppercase()) && len < MAX_CODE_LEN {
                bytes[len] = b;
                len += 1;
            } else if !(b == b'.' && i == MIN_CODE_LEN) {
                clean = false;
                break;
            }
        }
        if clean {
            return shape(bytes, len);
        }
    }
    read_code_slow(raw)
}

fn read_code_slow(raw: &[u8]) -> Reading {
    let mut bytes = [0u8; MAX_CODE_LEN];
    let mut len = 0usize;
    if raw.len() > MAX_RAW_LEN {
        return Reading::Invalid;
    }
    let mut i = 0;
    let mut seen_other = false;
    while i < raw.len() {
        let b = raw[i];
        match b {
            b'0'..=b'9' | b'A'..=b'Z' | b'a'..=b'z' => {
                if len == MAX_CODE_LEN {
                    return Reading::Invalid;
                }
                bytes[len] = b.to_ascii_uppercase();
                len += 1;
            }
            b'.' | b' ' | b'\t' | b'*' | b'+' => {}
            b'-' => {
                // Only trailing dashes (`I10-`, `I10--`) are marks.
                if raw[i..].iter().any(|&c| !matches!(c, b'-' | b' ' | b'\t')) {
                    return Reading::Invalid;
                }
                break;
            }
            // The dagger sign U+2020 in UTF-8 (E2 80 A0).
            0xE2 if raw.get(i + 1) == Some(&0x80) && raw.get(i + 2) == Some(&0xA0) => {
                i += 2;
            }
            _ => seen_other = true,
        }
        i += 1;
    }
    if seen_other {
        return Reading::Invalid;
    }
    if len == 0 {
        return Reading::Empty;
    }
    shape(bytes, len)
}

/// Drops an `X` filler and checks the ICD-10 shape of normalised characters.
#[inline]
fn shape(mut bytes: [u8; MAX_CODE_LEN], mut len: usize) -> Reading {
    // `X` filler after a three-character category.
    if len > MIN_CODE_LEN && bytes[MIN_CODE_LEN..len].iter().all(|&c| c == b'X') {
        len = MIN_CODE_LEN;
    }
    if len < MIN_CODE_LEN
        || !bytes[0].is_ascii_uppercase()
        || !bytes[1].is_ascii_digit()
        || !(bytes[2].is_ascii_digit() || bytes[2].is_ascii_uppercase())
    {
        return Reading::Invalid;
    }
    for b in bytes.iter_mut().skip(len) {
        *b = 0;
    }
    Reading::Valid(Code {
        bytes,
        len: len as u8,
    })
}

/// Reads a code written in a code list (same rules as an extract, plus a
/// trailing `.x` or `x` meaning "whole category", as published tables write).
pub fn read_list_code(text: &str) -> Option<Code> {
    let t = text.trim();
    let t = t
        .strip_suffix(".x")
        .or_else(|| t.strip_suffix(".X"))
        .unwrap_or(t);
    match read_code(t.as_bytes()) {
        Reading::Valid(c) => Some(c),
        _ => None,
    }
}

/// Which positions of a range may hold a letter between its ends: bit `i`
/// is set when one of the two ends has a letter at position `i` (0-based).
///
/// The rule of `code-lists/FORMAT.md`: from the third character on, a range
/// claims a code with a letter in some position only when one of the range's
/// ends has a letter in that position. So `C77-C80` claims `C77`, `C78`,
/// `C79`, `C80` but not the ICD-10-CM letter categories `C7A` and `C7B` that
/// lie between its ends in character order; `C7A-C7B` claims both. (Which
/// ICD-10-CM categories have a letter third character: ICD-10-CM tabular
/// list; the rule itself is this project's.) The first character is always a
/// letter and the second always a digit.
#[inline]
fn letter_positions(first: &[u8], last: &[u8]) -> u8 {
    let mut mask = 0u8;
    for i in 0..first.len().min(last.len()).min(MAX_CODE_LEN) {
        if first[i].is_ascii_uppercase() || last[i].is_ascii_uppercase() {
            mask |= 1 << i;
        }
    }
    mask
}

/// Position alphabet for range expansion, as the code shape and the letter
/// rule allow: the first character runs over `A-Z`, the second over `0-9`,
/// every later one over `0-9`, then `A-Z` where `letters` has its bit set.
fn successor(code: &mut [u8], letters: u8) -> bool {
    for i in (0..code.len()).rev() {
        let (lo, hi) = match i {
            0 => (b'A', b'Z'),
            1 => (b'0', b'9'),
            _ if letters & (1 << i) != 0 => (b'0', b'Z'),
            _ => (b'0', b'9'),
        };
        let c = code[i];
        if c < hi {
            code[i] = if c == b'9' { b'A' } else { c + 1 };
            return true;
        }
        code[i] = lo;
    }
    false
}

/// Expands an inclusive range of equal-length codes into every code between
/// them that the range claims (see [`range_claims`]), calling `f` for each,
/// in increasing order. Stops (returning false) after `limit` codes.
pub fn expand_range(first: &Code, last: &Code, limit: usize, mut f: impl FnMut(Code)) -> bool {
    debug_assert_eq!(first.len(), last.len());
    let mut cur = *first;
    let n = cur.len();
    let letters = letter_positions(first.as_bytes(), last.as_bytes());
    let mut count = 0;
    loop {
        if count == limit {
            return false;
        }
        f(cur);
        count += 1;
        if cur.as_bytes() >= last.as_bytes() || !successor(&mut cur.bytes[..n], letters) {
            return true;
        }
    }
}

/// Whether the range `first`-`last` (equal lengths) claims some code that
/// starts with `prefix` (at most as long as the ends), i.e. whether `prefix`
/// is the beginning of one of the codes [`expand_range`] yields. A prefix
/// with a letter in a position (from the third) where neither end has one is
/// never claimed: `C77-C80` does not claim `C7A`.
pub fn range_claims(first: &Code, last: &Code, prefix: &[u8]) -> bool {
    let n = prefix.len();
    if n > first.len() || n > last.len() {
        return false;
    }
    let (lo, hi) = (&first.as_bytes()[..n], &last.as_bytes()[..n]);
    if prefix < lo || prefix > hi {
        return false;
    }
    let letters = letter_positions(first.as_bytes(), last.as_bytes());
    prefix
        .iter()
        .enumerate()
        .skip(2)
        .all(|(i, c)| !c.is_ascii_uppercase() || letters & (1 << i) != 0)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn s(raw: &str) -> String {
        match read_code(raw.as_bytes()) {
            Reading::Valid(c) => c.as_str().to_string(),
            Reading::Empty => "<empty>".into(),
            Reading::Invalid => "<invalid>".into(),
        }
    }

    // Code shapes: WHO ICD-10 categories are a letter, two digits; subcategories
    // add a digit after a dot; ICD-10-CM codes have up to 7 characters with
    // letters allowed from the third (common practice; WHO ICD-10 2019 and
    // ICD-10-CM conventions).
    #[test]
    fn normalises_case_dots_spaces_marks() {
        assert_eq!(s("I50.9"), "I509");
        assert_eq!(s(" i50.9 "), "I509");
        assert_eq!(s("I 50 9"), "I509");
        assert_eq!(s("E11.4†"), "E114");
        assert_eq!(s("G63.2*"), "G632");
        assert_eq!(s("A17.0+"), "A170");
        assert_eq!(s("I10-"), "I10");
        assert_eq!(s("I10X"), "I10");
        assert_eq!(s("I10XX"), "I10");
        assert_eq!(s("S72.001A"), "S72001A");
        assert_eq!(s("C4A.9"), "C4A9");
        assert_eq!(s("T36.0X1A"), "T360X1A");
        assert_eq!(s("N18.5"), "N185");
    }

    #[test]
    fn empty_and_invalid() {
        assert_eq!(s(""), "<empty>");
        assert_eq!(s("   "), "<empty>");
        assert_eq!(s("."), "<empty>");
        for bad in [
            "I2",
            "12345",
            "N/A",
            "UNKNOWN",
            "I-10",
            "II0",
            "I50.91234",
            "é50",
            "1I50",
        ] {
            assert_eq!(s(bad), "<invalid>", "{bad}");
        }
        let long = "I".repeat(100);
        assert_eq!(s(&long), "<invalid>");
    }

    #[test]
    fn prefix_keys_are_distinct_per_length() {
        let Reading::Valid(c) = read_code(b"I500") else {
            panic!()
        };
        let Reading::Valid(d) = read_code(b"I50") else {
            panic!()
        };
        assert_eq!(c.prefix_key(3), d.prefix_key(3));
        assert_ne!(c.prefix_key(4), d.prefix_key(3));
    }

    #[test]
    fn list_codes_accept_x_suffix() {
        assert_eq!(read_list_code("I50.x").unwrap().as_str(), "I50");
        assert_eq!(read_list_code("I42.5").unwrap().as_str(), "I425");
        assert!(read_list_code("I4").is_none());
    }

    #[test]
    fn range_expansion() {
        let a = read_list_code("C00").unwrap();
        let b = read_list_code("C26").unwrap();
        let mut v = vec![];
        assert!(expand_range(&a, &b, 1000, |c| v.push(c.as_str().to_string())));
        // Numeric ends claim no letter-third-character category in between
        // (C0A, C1Z): the letter rule of FORMAT.md.
        assert_eq!(v.len(), 27);
        assert_eq!(v[0], "C00");
        assert!(!v.contains(&"C0A".to_string()));
        assert_eq!(v.last().unwrap(), "C26");
        let a = read_list_code("I42.5").unwrap();
        let b = read_list_code("I42.9").unwrap();
        let mut v = vec![];
        expand_range(&a, &b, 1000, |c| v.push(c.as_str().to_string()));
        assert_eq!(v, ["I425", "I426", "I427", "I428", "I429"]);
        // The first character spans letters; the third stays numeric.
        let a = read_list_code("V01").unwrap();
        let b = read_list_code("X59").unwrap();
        let mut n = 0;
        expand_range(&a, &b, 100_000, |_| n += 1);
        // V01..V99, W00..W99, X00..X59.
        assert_eq!(n, 99 + 100 + 60);
        let mut n = 0;
        assert!(!expand_range(&a, &b, 10, |_| n += 1));
        assert_eq!(n, 10);
        // An end with a letter in the third position lets the range claim
        // letter categories there: C7A-C80 claims C7A..C7Z, then C80.
        let a = read_list_code("C7A").unwrap();
        let b = read_list_code("C80").unwrap();
        let mut v = vec![];
        expand_range(&a, &b, 1000, |c| v.push(c.as_str().to_string()));
        assert_eq!(v.len(), 27);
        assert_eq!(v[..2], ["C7A", "C7B"]);
        assert_eq!(v.last().unwrap(), "C80");
    }

    #[test]
    fn range_claims_follows_the_expansion() {
        let r = |a: &str, b: &str| (read_list_code(a).unwrap(), read_list_code(b).unwrap());
        let (a, b) = r("C77", "C80");
        assert!(range_claims(&a, &b, b"C78"));
        assert!(range_claims(&a, &b, b"C7"));
        assert!(!range_claims(&a, &b, b"C7A"));
        assert!(!range_claims(&a, &b, b"C81"));
        assert!(!range_claims(&a, &b, b"C781"));
        let (a, b) = r("C7A", "C80");
        assert!(range_claims(&a, &b, b"C7B"));
        // Every code the expansion yields is claimed, and every 3-character
        // code in the character interval that it skips is not.
        for (x, y) in [
            ("C00", "C26"),
            ("C45", "C58"),
            ("I425", "I429"),
            ("S000", "S099"),
        ] {
            let (a, b) = r(x, y);
            let mut yielded = std::collections::BTreeSet::new();
            expand_range(&a, &b, 100_000, |c| {
                yielded.insert(c.as_str().to_string());
            });
            for c in &yielded {
                assert!(range_claims(&a, &b, c.as_bytes()), "{c}");
            }
            let mut all = a;
            loop {
                let text = all.as_str().to_string();
                assert_eq!(
                    range_claims(&a, &b, text.as_bytes()),
                    yielded.contains(&text),
                    "{text}"
                );
                if all.as_bytes() >= b.as_bytes() || !successor(&mut all.bytes[..a.len()], 0xFF) {
                    break;
                }
            }
        }
    }
}
