//! Value records: how a scoring run hands its output rows to a typed sink
//! (a Parquet output) without writing its numbers as text to be parsed
//! again.
//!
//! A text output gets delimited lines; a typed output gets the same rows as
//! *value records* ([`crate::pipeline::OutputForm::ValueRecords`]): each
//! row is its pass-through part (the input's own fields as the text run
//! would copy them: a wide row's raw record, a long unit's id, episode and
//! kept values, or nothing when the sink copies a Parquet input's columns
//! itself), as a length and the delimited bytes with no line end, followed
//! by the row's score values in binary, one per output column of the
//! engine:
//!
//! | tag | value                         | then                          |
//! |-----|-------------------------------|-------------------------------|
//! | 0   | missing                       |                               |
//! | 1   | score, in `1/SCALE` points    | 8 bytes, little-endian `i64`  |
//! | 2   | band of a specification       | 2 bytes, little-endian band   |
//! | 3   | condition flag, absent        |                               |
//! | 4   | condition flag, present       |                               |
//!
//! The stream opens with [`MAGIC`] and a header record: the output's column
//! names as a delimited pass-through part with no values. Lengths are
//! unsigned LEB128 varints. The stream only lives between the pipeline and
//! its sink in one process; it is never written to a file.
//!
//! ```
//! use morbus::io::value_records::{put_text, put_values, start, Reader, Record};
//! use morbus::score::Value;
//!
//! let mut bytes = Vec::new();
//! start(&mut bytes);
//! put_text(&mut bytes, b"id,charlson_score");
//! put_text(&mut bytes, b"A");
//! put_values(&mut bytes, &[Value::Score { scaled: 30_000, decimals: 0 }]);
//!
//! let mut reader = Reader::new(1);
//! let mut seen = Vec::new();
//! reader
//!     .feed(&bytes, |r| {
//!         seen.push(match r {
//!             Record::Header(t) | Record::KeysHeader(t) => (t.to_vec(), None),
//!             Record::Row(t, v) => (t.to_vec(), Some(v.to_vec())),
//!         });
//!         Ok(())
//!     })
//!     .unwrap();
//! assert_eq!(seen[0], (b"id,charlson_score".to_vec(), None));
//! assert_eq!(seen[1].0, b"A");
//! assert_eq!(seen[1].1.as_ref().unwrap()[0], Value::Score { scaled: 30_000, decimals: 0 });
//! ```

use crate::score::Value;
use crate::Error;

/// The first bytes of a value-record stream: a sink that expects value
/// records refuses anything else (it would otherwise read text as lengths).
pub const MAGIC: &[u8] = b"\0morbus value records 1\0";

/// Appends `x` as an unsigned LEB128 varint.
#[inline]
pub fn put_varint(out: &mut Vec<u8>, mut x: u64) {
    while x >= 0x80 {
        out.push(x as u8 | 0x80);
        x >>= 7;
    }
    out.push(x as u8);
}

/// The first bytes of a value-record stream whose pass-through parts are
/// typed values (a typed source's ids, episode values and kept values, see
/// [`put_key`]) instead of delimited text.
pub const MAGIC_KEYS: &[u8] = b"\0morbus value records K\0";

/// Opens a stream: [`MAGIC`].
pub fn start(out: &mut Vec<u8>) {
    out.extend_from_slice(MAGIC);
}

/// Opens a stream whose rows' pass-through parts are keys ([`put_key`]):
/// [`MAGIC_KEYS`]. The header record stays delimited text (the names).
pub fn start_keys(out: &mut Vec<u8>) {
    out.extend_from_slice(MAGIC_KEYS);
}

/// Appends one field of a typed pass-through part: the value's key
/// ([`crate::rows::Field::value_into`]; empty for a missing value), as a
/// length and its bytes. A row's part is its fields in order.
#[inline]
pub fn put_key(out: &mut Vec<u8>, key: &[u8]) {
    put_varint(out, key.len() as u64);
    out.extend_from_slice(key);
}

/// The next key of a typed pass-through part ([`put_key`]), taken off its
/// front; `None` when the part is not a sequence of keys.
pub fn next_key<'a>(part: &mut &'a [u8]) -> Option<&'a [u8]> {
    let mut at = 0;
    let n = varint(part, &mut at).ok()?;
    let key = take(part, &mut at, usize::try_from(n).ok()?).ok()?;
    *part = &part[at..];
    Some(key)
}

/// Appends a row's (or the header's) pass-through part: its length, then
/// its delimited bytes (no line end).
#[inline]
pub fn put_text(out: &mut Vec<u8>, text: &[u8]) {
    put_varint(out, text.len() as u64);
    out.extend_from_slice(text);
}

/// Appends a row's values (after its pass-through part); the scores keep
/// their `1/SCALE` units, so nothing is rounded on the way.
#[inline]
pub fn put_values(out: &mut Vec<u8>, values: &[Value]) {
    for v in values {
        match *v {
            Value::Missing => out.push(0),
            Value::Score { scaled, .. } => {
                out.push(1);
                out.extend_from_slice(&scaled.to_le_bytes());
            }
            Value::Band { band, .. } => {
                out.push(2);
                out.extend_from_slice(&band.to_le_bytes());
            }
            Value::Flag(false) => out.push(3),
            Value::Flag(true) => out.push(4),
        }
    }
}

/// A record read back: the header's names, or a row's pass-through part and
/// values. A score's `decimals` and a band's `spec` are not in the stream
/// (they are the column's): they read back as 0.
pub enum Record<'a> {
    Header(&'a [u8]),
    /// The header of a stream whose rows' pass-through parts are keys
    /// ([`start_keys`]).
    KeysHeader(&'a [u8]),
    Row(&'a [u8], &'a [Value]),
}

/// Reads a value-record stream given in pieces of any size (as a [`std::io::Write`]
/// receives it): complete records are handed on, the rest waits for the
/// next piece.
pub struct Reader {
    /// Values per row.
    width: usize,
    pending: Vec<u8>,
    /// Bytes of `pending` already read.
    at: usize,
    /// Whether the magic and the header have been read.
    magic: bool,
    /// Whether the stream opened with [`MAGIC_KEYS`].
    keys: bool,
    header: bool,
    values: Vec<Value>,
}

/// Why a record could not be read yet.
enum Short {
    /// More bytes are needed.
    More,
    /// The bytes cannot be a record.
    Damaged(&'static str),
}

fn varint(b: &[u8], at: &mut usize) -> Result<u64, Short> {
    let mut x = 0u64;
    let mut shift = 0;
    loop {
        let Some(&byte) = b.get(*at) else {
            return Err(Short::More);
        };
        *at += 1;
        if shift > 63 {
            return Err(Short::Damaged("a length too long"));
        }
        x |= u64::from(byte & 0x7f) << shift;
        if byte & 0x80 == 0 {
            return Ok(x);
        }
        shift += 7;
    }
}

fn take<'a>(b: &'a [u8], at: &mut usize, n: usize) -> Result<&'a [u8], Short> {
    let end = at
        .checked_add(n)
        .ok_or(Short::Damaged("a length too long"))?;
    let s = b.get(*at..end).ok_or(Short::More)?;
    *at = end;
    Ok(s)
}

impl Reader {
    /// A reader of rows with `width` values each.
    pub fn new(width: usize) -> Reader {
        Reader {
            width,
            pending: Vec::new(),
            at: 0,
            magic: false,
            keys: false,
            header: false,
            values: Vec::with_capacity(width),
        }
    }

    /// Reads `input` (the next piece of the stream), handing every complete
    /// record to `each`; stops at the first error `each` returns.
    pub fn feed(
        &mut self,
        input: &[u8],
        mut each: impl FnMut(Record<'_>) -> Result<(), Error>,
    ) -> Result<(), Error> {
        self.pending.extend_from_slice(input);
        if !self.magic {
            let opens = |m: &[u8]| {
                let n = self.pending.len().min(m.len());
                self.pending[..n] == m[..n]
            };
            if !opens(MAGIC) && !opens(MAGIC_KEYS) {
                return Err(damaged("it does not open as value records"));
            }
            if self.pending.len() < MAGIC.len() {
                return Ok(());
            }
            self.keys = self.pending.starts_with(MAGIC_KEYS);
            self.magic = true;
            self.at = MAGIC.len();
        }
        loop {
            let mut at = self.at;
            let b = &self.pending;
            let text = match varint(b, &mut at).and_then(|n| take(b, &mut at, n as usize)) {
                Ok(t) => t,
                Err(Short::More) => break,
                Err(Short::Damaged(m)) => return Err(damaged(m)),
            };
            if !self.header {
                self.header = true;
                self.at = at;
                each(if self.keys {
                    Record::KeysHeader(text)
                } else {
                    Record::Header(text)
                })?;
                continue;
            }
            self.values.clear();
            let mut complete = true;
            for _ in 0..self.width {
                let Some(&tag) = b.get(at) else {
                    complete = false;
                    break;
                };
                at += 1;
                let v = match tag {
                    0 => Value::Missing,
                    1 => match take(b, &mut at, 8) {
                        Ok(x) => Value::Score {
                            scaled: i64::from_le_bytes(x.try_into().expect("8 bytes")),
                            decimals: 0,
                        },
                        Err(_) => {
                            complete = false;
                            break;
                        }
                    },
                    2 => match take(b, &mut at, 2) {
                        Ok(x) => Value::Band {
                            spec: 0,
                            band: u16::from_le_bytes(x.try_into().expect("2 bytes")),
                        },
                        Err(_) => {
                            complete = false;
                            break;
                        }
                    },
                    3 => Value::Flag(false),
                    4 => Value::Flag(true),
                    _ => return Err(damaged("a value of no known kind")),
                };
                self.values.push(v);
            }
            if !complete {
                break;
            }
            self.at = at;
            each(Record::Row(text, &self.values))?;
        }
        // Keep only what is not read yet.
        if self.at > 0 && (self.at == self.pending.len() || self.at >= 1 << 16) {
            self.pending.drain(..self.at);
            self.at = 0;
        }
        Ok(())
    }

    /// Whether the rows' pass-through parts are keys ([`start_keys`]);
    /// known once the stream's opening is read.
    pub fn keys(&self) -> bool {
        self.keys
    }

    /// Whether the stream ended between records (after its header).
    pub fn complete(&self) -> bool {
        self.at == self.pending.len() && (self.header || self.pending.is_empty())
    }
}

fn damaged(what: &str) -> Error {
    Error::data(
        None,
        format!("internal error: the scores handed to the typed output are damaged: {what}"),
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    type Rows = Vec<(Vec<u8>, Vec<Value>)>;

    fn rows() -> Rows {
        vec![
            (
                b"A,\"x, y\"".to_vec(),
                vec![
                    Value::Score {
                        scaled: -12_345,
                        decimals: 0,
                    },
                    Value::Missing,
                    Value::Band { spec: 0, band: 513 },
                    Value::Flag(true),
                ],
            ),
            (
                Vec::new(),
                vec![
                    Value::Score {
                        scaled: i64::MAX,
                        decimals: 0,
                    },
                    Value::Flag(false),
                    Value::Missing,
                    Value::Missing,
                ],
            ),
            (
                vec![b'z'; 300],
                vec![
                    Value::Missing,
                    Value::Missing,
                    Value::Flag(true),
                    Value::Flag(false),
                ],
            ),
        ]
    }

    fn stream() -> Vec<u8> {
        let mut b = Vec::new();
        start(&mut b);
        put_text(&mut b, b"id,label,a,b,c,d");
        for (t, v) in rows() {
            put_text(&mut b, &t);
            put_values(&mut b, &v);
        }
        b
    }

    fn read(pieces: &[&[u8]]) -> (Vec<u8>, Rows, bool) {
        let mut r = Reader::new(4);
        let mut head = Vec::new();
        let mut got = Vec::new();
        for p in pieces {
            r.feed(p, |rec| {
                match rec {
                    Record::Header(t) | Record::KeysHeader(t) => head = t.to_vec(),
                    Record::Row(t, v) => got.push((t.to_vec(), v.to_vec())),
                }
                Ok(())
            })
            .unwrap();
        }
        (head, got, r.complete())
    }

    #[test]
    fn rows_come_back_whatever_the_pieces() {
        let b = stream();
        let whole = read(&[&b]);
        assert_eq!(whole.0, b"id,label,a,b,c,d");
        assert_eq!(whole.1, rows());
        assert!(whole.2);
        // Every cut into two pieces, and byte by byte.
        for cut in 0..=b.len() {
            assert_eq!(read(&[&b[..cut], &b[cut..]]).1, rows(), "cut at {cut}");
        }
        let bytes: Vec<&[u8]> = b.chunks(1).collect();
        assert_eq!(read(&bytes).1, rows());
        // A stream cut short is not complete.
        assert!(!read(&[&b[..b.len() - 1]]).2);
    }

    #[test]
    fn typed_parts_give_their_keys_back() {
        let keys: [&[u8]; 4] = [
            b"",
            b"I\x00\x00\x00\x00\x00\x00\x00\x07",
            &[b'T'; 200],
            b"F",
        ];
        let mut part = Vec::new();
        for k in keys {
            put_key(&mut part, k);
        }
        let mut rest = &part[..];
        for k in keys {
            assert_eq!(next_key(&mut rest), Some(k));
        }
        assert!(rest.is_empty());
        // A part cut inside a key is not a sequence of keys.
        let mut cut = &part[..part.len() - 1];
        let mut n = 0;
        while next_key(&mut cut).is_some() {
            n += 1;
        }
        assert_eq!(n, 3);
        // A stream of keys reads back as such, its header marked.
        let mut b = Vec::new();
        start_keys(&mut b);
        put_text(&mut b, b"id,s");
        put_text(&mut b, &part);
        put_values(&mut b, &[Value::Flag(true)]);
        let mut r = Reader::new(1);
        let mut seen = Vec::new();
        r.feed(&b, |rec| {
            seen.push(match rec {
                Record::KeysHeader(t) => t.to_vec(),
                Record::Header(_) => panic!("a text header"),
                Record::Row(t, _) => t.to_vec(),
            });
            Ok(())
        })
        .unwrap();
        assert!(r.keys() && r.complete());
        assert_eq!(seen, vec![b"id,s".to_vec(), part]);
    }

    #[test]
    fn text_is_refused_as_value_records() {
        let mut r = Reader::new(1);
        let e = r.feed(b"id,dx1\nA,I21\n", |_| Ok(())).unwrap_err();
        assert!(e.to_string().contains("internal error"), "{e}");
        let mut b = Vec::new();
        start(&mut b);
        put_text(&mut b, b"h");
        put_text(&mut b, b"");
        b.push(9);
        let e = Reader::new(1).feed(&b, |_| Ok(())).unwrap_err();
        assert!(e.to_string().contains("no known kind"), "{e}");
    }
}
