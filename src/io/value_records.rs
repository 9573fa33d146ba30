//! Value records: how a run hands its output rows to a typed sink (a
//! Parquet output) without writing its values as text to be parsed again.
//!
//! A text output gets delimited lines; a typed output gets the same rows as
//! *value records* ([`crate::pipeline::OutputForm::ValueRecords`]): each
//! row is its pass-through part (the input's own fields as the text run
//! would copy them: a wide row's raw record, a long unit's id, episode and
//! kept values, or nothing when the sink copies a Parquet input's columns
//! itself or every cell comes as a value, as `explain`'s do), as a length
//! and the delimited bytes with no line end, followed by the row's values
//! in binary, one per value column of the output ([`Cell`]):
//!
//! | tag | value                               | then                                               |
//! |-----|-------------------------------------|----------------------------------------------------|
//! | 0   | missing                             |                                                    |
//! | 1   | score or weight, in `1/SCALE` points | 8 bytes, little-endian `i64`; 1 byte, its decimals |
//! | 2   | band of a specification             | 2 bytes, little-endian band                        |
//! | 3   | condition flag, absent              |                                                    |
//! | 4   | condition flag, present             |                                                    |
//! | 5   | whole number (a row number)         | zigzag LEB128 varint                               |
//! | 6   | date                                | 4 bytes, little-endian `i32` days since 1970-01-01 |
//! | 7   | text                                | its length, then its bytes                         |
//! | 8   | typed value (a key, [`put_key`])    | its length, then its bytes                         |
//!
//! The stream opens with [`MAGIC`] and a header record: the output's column
//! names as a delimited pass-through part with no values. Lengths are
//! unsigned LEB128 varints. The stream only lives between the pipeline and
//! its sink in one process (or a run's own temporary files); it is never
//! written as an output.
//!
//! A stream whose pass-through parts are typed values (a typed source's ids,
//! episode values and kept values) opens with [`MAGIC_KEYS`] instead: its
//! header is the same delimited names, its rows' pass-through parts are
//! sequences of keys ([`put_key`], [`next_key`]), and their cells follow as
//! above.
//!
//! A typed value can also come as a cell ([`Cell::Key`], `explain`'s id,
//! episode and label values of a typed source): the bytes of
//! [`crate::rows::Field::value_into`] (or `key_into`), from which the sink
//! builds the column with the input's type; no text is made of it.
//!
//! ```
//! use morbus::io::value_records::{put_cell, put_text, put_values, start, Cell, Reader, Record};
//! use morbus::score::Value;
//!
//! let mut bytes = Vec::new();
//! start(&mut bytes);
//! put_text(&mut bytes, b"id,charlson_score,note,day");
//! put_text(&mut bytes, b"A");
//! put_values(&mut bytes, &[Value::Score { scaled: 30_000, decimals: 0 }]);
//! put_cell(&mut bytes, Cell::Text(b"first"));
//! put_cell(&mut bytes, Cell::Date(19_000));
//!
//! let mut reader = Reader::new(3);
//! let mut seen = Vec::new();
//! reader
//!     .feed(&bytes, |r| {
//!         seen.push(match r {
//!             Record::Header(t) | Record::KeysHeader(t) => (t.to_vec(), Vec::new()),
//!             Record::Row(t, cells) => (t.to_vec(), cells.iter().map(|c| format!("{c:?}")).collect()),
//!         });
//!         Ok(())
//!     })
//!     .unwrap();
//! assert_eq!(seen[0].0, b"id,charlson_score,note,day");
//! assert_eq!(seen[1].0, b"A");
//! assert_eq!(
//!     seen[1].1,
//!     [
//!         format!("{:?}", Cell::Value(Value::Score { scaled: 30_000, decimals: 0 })),
//!         format!("{:?}", Cell::Text(b"first")),
//!         format!("{:?}", Cell::Date(19_000)),
//!     ]
//! );
//! ```

use crate::score::Value;
use crate::Error;

/// The first bytes of a value-record stream: a sink that expects value
/// records refuses anything else (it would otherwise read text as lengths).
pub const MAGIC: &[u8] = b"\0morbus value records 2\0";

/// A value of a record: one of the engine's score values, or one of the
/// other kinds an output hands over typed (`explain`'s row numbers, dates
/// and text).
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Cell<'a> {
    /// A score value (missing, a score with its decimals, a band, a flag).
    /// A band's `spec` is not in the stream (it is the column's): it reads
    /// back as 0.
    Value(Value),
    /// A whole number.
    Whole(i64),
    /// A date, as days since 1970-01-01.
    Date(i32),
    /// Text (a sink keeps it as text; empty text is missing).
    Text(&'a [u8]),
    /// A typed value as its key ([`crate::rows::Field::value_into`],
    /// [`crate::rows::key_field`] reads it back; an empty key is missing).
    Key(&'a [u8]),
}

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

// The reader tells the two openings apart after `MAGIC.len()` bytes.
const _: () = assert!(MAGIC.len() == MAGIC_KEYS.len());

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

/// Appends one value of a row (after its pass-through part); scores keep
/// their `1/SCALE` units, so nothing is rounded on the way.
#[inline]
pub fn put_cell(out: &mut Vec<u8>, cell: Cell<'_>) {
    match cell {
        Cell::Value(Value::Missing) => out.push(0),
        Cell::Value(Value::Score { scaled, decimals }) => {
            out.push(1);
            out.extend_from_slice(&scaled.to_le_bytes());
            out.push(decimals.min(u32::from(u8::MAX)) as u8);
        }
        Cell::Value(Value::Band { band, .. }) => {
            out.push(2);
            out.extend_from_slice(&band.to_le_bytes());
        }
        Cell::Value(Value::Flag(false)) => out.push(3),
        Cell::Value(Value::Flag(true)) => out.push(4),
        Cell::Whole(x) => {
            out.push(5);
            put_varint(out, ((x << 1) ^ (x >> 63)) as u64);
        }
        Cell::Date(d) => {
            out.push(6);
            out.extend_from_slice(&d.to_le_bytes());
        }
        Cell::Text(t) => {
            out.push(7);
            put_text(out, t);
        }
        Cell::Key(k) => {
            out.push(8);
            put_text(out, k);
        }
    }
}

/// Appends a row's score values (after its pass-through part).
#[inline]
pub fn put_values(out: &mut Vec<u8>, values: &[Value]) {
    for &v in values {
        put_cell(out, Cell::Value(v));
    }
}

/// A record read back: the header's names, or a row's pass-through part and
/// values.
pub enum Record<'a> {
    Header(&'a [u8]),
    /// The header of a stream whose rows' pass-through parts are keys
    /// ([`start_keys`]).
    KeysHeader(&'a [u8]),
    Row(&'a [u8], &'a [Cell<'a>]),
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

fn array<const N: usize>(b: &[u8], at: &mut usize) -> Result<[u8; N], Short> {
    take(b, at, N).map(|s| s.try_into().expect("N bytes"))
}

/// The value at `at` of `b`.
fn cell<'a>(b: &'a [u8], at: &mut usize) -> Result<Cell<'a>, Short> {
    let Some(&tag) = b.get(*at) else {
        return Err(Short::More);
    };
    *at += 1;
    Ok(match tag {
        0 => Cell::Value(Value::Missing),
        1 => {
            let scaled = i64::from_le_bytes(array(b, at)?);
            let [decimals] = array(b, at)?;
            Cell::Value(Value::Score {
                scaled,
                decimals: u32::from(decimals),
            })
        }
        2 => Cell::Value(Value::Band {
            spec: 0,
            band: u16::from_le_bytes(array(b, at)?),
        }),
        3 => Cell::Value(Value::Flag(false)),
        4 => Cell::Value(Value::Flag(true)),
        5 => {
            let z = varint(b, at)?;
            Cell::Whole((z >> 1) as i64 ^ -((z & 1) as i64))
        }
        6 => Cell::Date(i32::from_le_bytes(array(b, at)?)),
        7 => {
            let n = varint(b, at)?;
            let n = usize::try_from(n).map_err(|_| Short::Damaged("a length too long"))?;
            Cell::Text(take(b, at, n)?)
        }
        8 => {
            let n = varint(b, at)?;
            let n = usize::try_from(n).map_err(|_| Short::Damaged("a length too long"))?;
            Cell::Key(take(b, at, n)?)
        }
        _ => return Err(Short::Damaged("a value of no known kind")),
    })
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
        let b = &self.pending;
        let mut cells: Vec<Cell<'_>> = Vec::with_capacity(self.width);
        'records: loop {
            let mut at = self.at;
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
            cells.clear();
            for _ in 0..self.width {
                match cell(b, &mut at) {
                    Ok(c) => cells.push(c),
                    Err(Short::More) => break 'records,
                    Err(Short::Damaged(m)) => return Err(damaged(m)),
                }
            }
            self.at = at;
            each(Record::Row(text, &cells))?;
        }
        drop(cells);
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
        format!("internal error: the values handed to the typed output are damaged: {what}"),
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    type Rows = Vec<(Vec<u8>, Vec<Cell<'static>>)>;
    /// Rows read back: pass-through parts and their values as printed.
    type Shown = Vec<(Vec<u8>, String)>;

    /// 300 bytes of text: a length of two varint bytes.
    static LONG: [u8; 300] = [b'z'; 300];

    fn rows() -> Rows {
        let score = |scaled, decimals| Cell::Value(Value::Score { scaled, decimals });
        vec![
            (
                b"A,\"x, y\"".to_vec(),
                vec![
                    score(-12_345, 0),
                    Cell::Value(Value::Missing),
                    Cell::Value(Value::Band { spec: 0, band: 513 }),
                    Cell::Value(Value::Flag(true)),
                    Cell::Whole(0),
                    Cell::Date(-719_162),
                    Cell::Text(b""),
                    Cell::Key(b"I\x00\x20\x00\x00\x00\x00\x00\x01"),
                ],
            ),
            (
                Vec::new(),
                vec![
                    score(i64::MAX, 4),
                    Cell::Value(Value::Flag(false)),
                    Cell::Whole(i64::MIN),
                    Cell::Whole(i64::MAX),
                    Cell::Date(2_932_896),
                    Cell::Text("caf\u{e9}, \"quoted\"\nnext line".as_bytes()),
                    Cell::Text(b"\xff\xfe not UTF-8"),
                    Cell::Key(b""),
                ],
            ),
            (
                LONG.to_vec(),
                vec![
                    Cell::Text(&LONG),
                    Cell::Whole(-1),
                    Cell::Whole(300),
                    score(-5_000, 1),
                    Cell::Value(Value::Missing),
                    Cell::Date(0),
                    Cell::Value(Value::Flag(false)),
                    Cell::Key(&LONG),
                ],
            ),
        ]
    }

    fn stream() -> Vec<u8> {
        let mut b = Vec::new();
        start(&mut b);
        put_text(&mut b, b"id,label,a,b,c,d,e,f,g,h");
        for (t, v) in rows() {
            put_text(&mut b, &t);
            for c in v {
                put_cell(&mut b, c);
            }
        }
        b
    }

    fn read(pieces: &[&[u8]]) -> (Vec<u8>, Shown, bool) {
        let mut r = Reader::new(8);
        let mut head = Vec::new();
        let mut got = Vec::new();
        for p in pieces {
            r.feed(p, |rec| {
                match rec {
                    Record::Header(t) | Record::KeysHeader(t) => head = t.to_vec(),
                    Record::Row(t, v) => got.push((t.to_vec(), format!("{v:?}"))),
                }
                Ok(())
            })
            .unwrap();
        }
        (head, got, r.complete())
    }

    fn want() -> Shown {
        rows()
            .into_iter()
            .map(|(t, v)| (t, format!("{v:?}")))
            .collect()
    }

    #[test]
    fn rows_come_back_whatever_the_pieces() {
        let b = stream();
        let whole = read(&[&b]);
        assert_eq!(whole.0, b"id,label,a,b,c,d,e,f,g,h");
        assert_eq!(whole.1, want());
        assert!(whole.2);
        // Every cut into two pieces, and byte by byte.
        for cut in 0..=b.len() {
            assert_eq!(read(&[&b[..cut], &b[cut..]]).1, want(), "cut at {cut}");
        }
        let bytes: Vec<&[u8]> = b.chunks(1).collect();
        assert_eq!(read(&bytes).1, want());
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
        put_text(&mut b, &part);
        put_cell(&mut b, Cell::Date(3));
        let mut r = Reader::new(1);
        let mut seen = Vec::new();
        let mut cells = Vec::new();
        r.feed(&b, |rec| {
            seen.push(match rec {
                Record::KeysHeader(t) => t.to_vec(),
                Record::Header(_) => panic!("a text header"),
                Record::Row(t, c) => {
                    cells.push(format!("{c:?}"));
                    t.to_vec()
                }
            });
            Ok(())
        })
        .unwrap();
        assert!(r.keys() && r.complete());
        assert_eq!(seen, vec![b"id,s".to_vec(), part.clone(), part]);
        assert_eq!(
            cells,
            [
                format!("{:?}", [Cell::Value(Value::Flag(true))]),
                format!("{:?}", [Cell::Date(3)]),
            ]
        );
    }

    #[test]
    fn cells_have_the_documented_bytes() {
        // Worked by hand from the table in the module's documentation:
        // LEB128 (7 bits a byte, low first, high bit: more follows) of the
        // zigzag mapping (0, -1, 1, -2, 2, ... to 0, 1, 2, 3, 4, ...).
        let bytes = |c: Cell<'_>| {
            let mut b = Vec::new();
            put_cell(&mut b, c);
            b
        };
        assert_eq!(bytes(Cell::Whole(0)), [5, 0]);
        assert_eq!(bytes(Cell::Whole(-1)), [5, 1]);
        assert_eq!(bytes(Cell::Whole(1)), [5, 2]);
        // 64 -> 128 = 0b1000_0000: low seven bits 0 with "more", then 1.
        assert_eq!(bytes(Cell::Whole(64)), [5, 0x80, 0x01]);
        // 300 -> 600 = 0b100_1011000: 0x58 | 0x80, then 0b100.
        assert_eq!(bytes(Cell::Whole(300)), [5, 0xd8, 0x04]);
        // 1970-01-02 is day 1; 1969-12-31 is day -1.
        assert_eq!(bytes(Cell::Date(1)), [6, 1, 0, 0, 0]);
        assert_eq!(bytes(Cell::Date(-1)), [6, 0xff, 0xff, 0xff, 0xff]);
        assert_eq!(bytes(Cell::Text(b"ab")), [7, 2, b'a', b'b']);
        assert_eq!(bytes(Cell::Text(b"")), [7, 0]);
        // A key: the tag, its length and its bytes (here the key of the
        // whole number 2^53 + 1: `I` and eight bytes, high first).
        assert_eq!(
            bytes(Cell::Key(b"I\x00\x20\x00\x00\x00\x00\x00\x01")),
            [8, 9, b'I', 0, 0x20, 0, 0, 0, 0, 0, 1]
        );
        assert_eq!(bytes(Cell::Key(b"")), [8, 0]);
        let mut key = Vec::new();
        crate::rows::Field::Integer(9_007_199_254_740_993).value_into(&mut key);
        assert_eq!(key, b"I\x00\x20\x00\x00\x00\x00\x00\x01");
        // 1.5 points with one decimal: 15,000 in 1/10,000 points.
        assert_eq!(
            bytes(Cell::Value(Value::Score {
                scaled: 15_000,
                decimals: 1
            })),
            [1, 0x98, 0x3a, 0, 0, 0, 0, 0, 0, 1]
        );
        assert_eq!(bytes(Cell::Value(Value::Missing)), [0]);
        assert_eq!(
            bytes(Cell::Value(Value::Band { spec: 3, band: 258 })),
            [2, 2, 1]
        );
        assert_eq!(bytes(Cell::Value(Value::Flag(false))), [3]);
        assert_eq!(bytes(Cell::Value(Value::Flag(true))), [4]);
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
