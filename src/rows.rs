//! The engine's row model: what a run reads from an extract, whatever the
//! extract is made of.
//!
//! A row exposes its values column by column ([`Row::field`]) as a
//! [`Field`]: text read in place (a field of a delimited record, a string of
//! a data frame or an Arrow array), a whole number, a floating-point number,
//! true/false, a date as a day number, or missing. The columns a run uses
//! (diagnoses and their present-on-admission indicators, primary flag, id,
//! episode, date, age, kept columns) are resolved once against the extract's
//! header by the pipeline's `Plan`, and read from a row by its `read_*`
//! methods, the one place that decides how a code, an indicator, a date or
//! an age is read, whatever the source. Two kinds of rows implement it:
//!
//! - a delimited-text record ([`crate::io::Fields`]): every field is
//!   [`Field::Text`], read in the input's own buffer;
//! - a row of a typed [`Batch`]: a data frame's rows (`frame::Columns`, the
//!   R and Python packages' frames) or an Arrow record batch (a Parquet
//!   input), handed to the history reader batch by batch by a
//!   [`RowSource`], so that no text is made of them on the way.
//!
//! Rows are named in messages by their line (text) or their row number
//! (frames, `row 4: ...`; Parquet, `row 4 of in.parquet: ...`,
//! [`RowNaming`]).

use std::borrow::Cow;

use crate::io::Fields;
use crate::pipeline::dates::{days_from_civil, write_iso_date};
use crate::pipeline::Header;
use crate::score::{read_age, MAX_AGE};
use crate::Error;

/// What a column holds, as a whole.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Kind {
    Text,
    /// Whole numbers.
    Integer,
    /// Floating-point numbers.
    Number,
    /// True/false.
    Logical,
    /// Dates (days since 1970-01-01).
    Date,
    /// Anything else (the binding names it in `Columns::type_name`).
    Other,
}

/// One value of a column.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Field<'a> {
    /// Missing (`NA`, `None`, null).
    Null,
    Text(&'a [u8]),
    Integer(i64),
    /// NaN counts as missing.
    Number(f64),
    Logical(bool),
    /// Days since 1970-01-01.
    Date(i64),
}

impl<'a> Field<'a> {
    /// The value as the text a delimited extract would hold for it (`None`:
    /// missing): text as it is, whole numbers as their digits, numbers
    /// without a fraction as whole numbers, others in Rust's shortest
    /// round-trip form, `true`/`false`, dates as ISO dates. This is how a
    /// typed value is compared with the text values the rules name (an
    /// indicator `1`, a flag `true`) and how an id becomes a key; only
    /// non-text values allocate.
    ///
    /// ```
    /// use morbus::rows::Field;
    /// assert_eq!(Field::Integer(7).text().unwrap().as_ref(), b"7");
    /// assert_eq!(Field::Number(3.0).text().unwrap().as_ref(), b"3");
    /// assert_eq!(Field::Number(2.5).text().unwrap().as_ref(), b"2.5");
    /// assert_eq!(Field::Date(0).text().unwrap().as_ref(), b"1970-01-01");
    /// assert_eq!(Field::Number(f64::NAN).text(), None);
    /// ```
    #[inline]
    pub fn text(self) -> Option<Cow<'a, [u8]>> {
        match self {
            Field::Null => None,
            Field::Text(t) => Some(Cow::Borrowed(t)),
            Field::Number(x) if x.is_nan() => None,
            Field::Logical(b) => Some(Cow::Borrowed(if b { b"true" } else { b"false" })),
            _ => {
                let mut out = Vec::with_capacity(24);
                self.write_text(&mut out);
                Some(Cow::Owned(out))
            }
        }
    }

    /// Appends [`Field::text`] to `out` (nothing when missing): the same
    /// rule, for a caller that reuses its buffer.
    pub fn write_text(self, out: &mut Vec<u8>) {
        use std::io::Write as _;
        // Writing to a Vec cannot fail.
        let _ = match self {
            Field::Null => Ok(()),
            Field::Text(t) => {
                out.extend_from_slice(t);
                Ok(())
            }
            Field::Integer(i) => write!(out, "{i}"),
            Field::Number(x) if x.is_nan() => Ok(()),
            Field::Number(x) if x.fract() == 0.0 && x.abs() < 1e15 => write!(out, "{}", x as i64),
            Field::Number(x) => write!(out, "{x}"),
            Field::Logical(b) => {
                out.extend_from_slice(if b { b"true" } else { b"false" });
                Ok(())
            }
            Field::Date(d) => {
                write_iso_date(d, out);
                Ok(())
            }
        };
    }

    /// [`Field::text`], empty for a missing value.
    #[inline]
    pub fn text_or_empty(self) -> Cow<'a, [u8]> {
        self.text().unwrap_or(Cow::Borrowed(b""))
    }
}

/// Tags of a typed value's key (see [`Field::key_into`]).
const KEY_TEXT: u8 = b'T';
const KEY_INTEGER: u8 = b'I';
const KEY_NUMBER: u8 = b'F';
const KEY_LOGICAL: u8 = b'L';
const KEY_DATE: u8 = b'D';

impl<'a> Field<'a> {
    /// Appends the value's key to `out`: the bytes by which a typed
    /// source's ids, episode values and kept values are told apart, stored
    /// and handed to a typed sink, without making text of them. Returns
    /// whether the value is present (not null, not NaN, not blank text).
    ///
    /// A key is a tag and the value: text as its bytes, a whole number, a
    /// date (its day) or a number as 8 bytes, true/false as one byte; a
    /// missing value (null, empty text, NaN) has an empty key; blank text
    /// keeps its bytes, as a delimited field would. Two values of one column have the same key
    /// exactly when they are equal: `-0.0` is written as `0.0` (they are
    /// equal numbers), and NaN is missing. [`key_field`] reads a key back.
    /// (A column's values are all of one kind, so keys of different kinds
    /// never meet.)
    ///
    /// ```
    /// use morbus::rows::{key_field, Field};
    /// let mut k = Vec::new();
    /// assert!(Field::Integer(9_007_199_254_740_993).key_into(&mut k));
    /// assert_eq!(key_field(&k), Field::Integer(9_007_199_254_740_993));
    /// let (mut a, mut b) = (Vec::new(), Vec::new());
    /// Field::Number(-0.0).key_into(&mut a);
    /// Field::Number(0.0).key_into(&mut b);
    /// assert_eq!(a, b);
    /// let (mut a, mut b) = (Vec::new(), Vec::new());
    /// Field::Text(b"007").key_into(&mut a);
    /// Field::Text(b"7").key_into(&mut b);
    /// assert_ne!(a, b);
    /// assert!(!Field::Number(f64::NAN).key_into(&mut Vec::new()));
    /// ```
    #[inline]
    pub fn key_into(self, out: &mut Vec<u8>) -> bool {
        match self {
            // -0.0 and 0.0 are equal numbers: one key.
            Field::Number(x) => Field::Number(if x == 0.0 { 0.0 } else { x }).value_into(out),
            _ => self.value_into(out),
        }
    }

    /// Like [`Field::key_into`], but a number keeps its exact bits (`-0.0`
    /// stays `-0.0`): the value as a typed sink writes it back.
    #[inline]
    pub fn value_into(self, out: &mut Vec<u8>) -> bool {
        match self {
            // Null and empty text are one (a delimited field holds both
            // as nothing).
            Field::Null | Field::Text(b"") => false,
            Field::Text(t) => {
                out.push(KEY_TEXT);
                out.extend_from_slice(t);
                !t.trim_ascii().is_empty()
            }
            Field::Integer(i) => {
                out.push(KEY_INTEGER);
                out.extend_from_slice(&i.to_be_bytes());
                true
            }
            Field::Number(x) if x.is_nan() => false,
            Field::Number(x) => {
                out.push(KEY_NUMBER);
                out.extend_from_slice(&x.to_bits().to_be_bytes());
                true
            }
            Field::Logical(b) => {
                out.extend_from_slice(&[KEY_LOGICAL, b as u8]);
                true
            }
            Field::Date(d) => {
                out.push(KEY_DATE);
                out.extend_from_slice(&d.to_be_bytes());
                true
            }
        }
    }
}

/// The value whose key ([`Field::key_into`], [`Field::value_into`]) is
/// `key` (an empty key, or one that is no key, reads as missing).
pub fn key_field(key: &[u8]) -> Field<'_> {
    let eight = |b: &[u8]| -> Option<[u8; 8]> { b.try_into().ok() };
    match key.split_first() {
        Some((&KEY_TEXT, t)) => Field::Text(t),
        Some((&KEY_INTEGER, b)) => {
            eight(b).map_or(Field::Null, |b| Field::Integer(i64::from_be_bytes(b)))
        }
        Some((&KEY_NUMBER, b)) => eight(b).map_or(Field::Null, |b| {
            Field::Number(f64::from_bits(u64::from_be_bytes(b)))
        }),
        Some((&KEY_LOGICAL, &[b])) => Field::Logical(b != 0),
        Some((&KEY_DATE, b)) => {
            eight(b).map_or(Field::Null, |b| Field::Date(i64::from_be_bytes(b)))
        }
        _ => Field::Null,
    }
}

/// How the ids, episode values and kept values of a run are held: as the
/// bytes of their text (a delimited extract) or as keys of typed values
/// ([`Field::key_into`]: a frame or an Arrow source).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum Keys {
    #[default]
    Text,
    Typed,
}

impl Keys {
    /// The value held as `key`.
    #[inline]
    pub fn field(self, key: &[u8]) -> Field<'_> {
        match self {
            Keys::Text => Field::Text(key),
            Keys::Typed => key_field(key),
        }
    }

    /// The value held as `key`, as the text a delimited extract would hold
    /// ([`Field::text`], empty when missing): for output lines and
    /// messages. Text is borrowed; only other values allocate.
    #[inline]
    pub fn text(self, key: &[u8]) -> Cow<'_, [u8]> {
        match self {
            Keys::Text => Cow::Borrowed(key),
            Keys::Typed => key_field(key).text_or_empty(),
        }
    }

    /// Whether two values held as keys are equal (numbers by value: `-0.0`
    /// equals `0.0`).
    #[inline]
    pub fn same(self, a: &[u8], b: &[u8]) -> bool {
        match (self, a.first()) {
            (Keys::Typed, Some(&KEY_NUMBER)) => match (key_field(a), key_field(b)) {
                (Field::Number(x), Field::Number(y)) => x == y,
                _ => a == b,
            },
            _ => a == b,
        }
    }
}

/// One row of an extract.
pub trait Row {
    /// The value of column `col` (numbered as in the run's header).
    fn field(&self, col: usize) -> Field<'_>;

    /// Appends the key of column `col`'s value to `out` (the field's bytes
    /// for a delimited record; [`Field::key_into`] for a typed row, or
    /// [`Field::value_into`] when `exact`); returns whether the value is
    /// present (not missing, not blank).
    #[inline]
    fn key_into(&self, col: usize, exact: bool, out: &mut Vec<u8>) -> bool {
        let f = self.field(col);
        if exact {
            f.value_into(out)
        } else {
            f.key_into(out)
        }
    }
}

impl Row for Fields<'_> {
    #[inline]
    fn field(&self, col: usize) -> Field<'_> {
        Field::Text(self.get(col))
    }

    #[inline]
    fn key_into(&self, col: usize, _exact: bool, out: &mut Vec<u8>) -> bool {
        let t = self.get(col);
        out.extend_from_slice(t);
        !t.trim_ascii().is_empty()
    }
}

/// A batch of rows of typed columns: part of a data frame, or an Arrow
/// record batch. Columns are numbered as in the header of its
/// [`RowSource`].
pub trait Batch: Send + Sync {
    /// Number of rows.
    fn len(&self) -> usize;
    /// Whether the batch has no rows.
    fn is_empty(&self) -> bool {
        self.len() == 0
    }
    /// The value of column `col` at `row` (from 0 in the batch).
    fn field(&self, col: usize, row: usize) -> Field<'_>;
    /// The Arrow record batch the rows are read from, when they are one (a
    /// Parquet input's): a typed sink copies its arrays or formats its
    /// values.
    #[cfg(feature = "arrow")]
    fn record_batch(&self) -> Option<&arrow_array::RecordBatch> {
        None
    }
}

/// Row `row` of a [`Batch`].
pub struct BatchRow<'a> {
    pub batch: &'a dyn Batch,
    pub row: usize,
}

impl Row for BatchRow<'_> {
    #[inline]
    fn field(&self, col: usize) -> Field<'_> {
        self.batch.field(col, self.row)
    }
}

/// How the rows of a [`RowSource`] are named in messages: `row N` (from
/// `first`), followed by ` of NAME` when the source has a name.
#[derive(Clone, Debug, Default)]
pub struct RowNaming {
    /// The number the first row is given (0 for Python, 1 for R and files).
    pub first: u64,
    /// The source as named in messages (a file name), if any.
    pub of: Option<String>,
}

impl RowNaming {
    /// `e` with the 1-based row number carried in its line turned into the
    /// row as this source names it.
    pub fn name(&self, e: Error) -> Error {
        let place = |n: u64| {
            let row = n.saturating_sub(1) + self.first;
            match &self.of {
                Some(name) => format!("row {row} of {name}"),
                None => format!("row {row}"),
            }
        };
        match e {
            Error::Strict {
                line: Some(n),
                message,
            } => Error::Strict {
                line: None,
                message: format!("{}: {message}", place(n)),
            },
            Error::Data {
                line: Some(n),
                message,
            } => Error::Data {
                line: None,
                message: format!("{}: {message}", place(n)),
            },
            other => other,
        }
    }
}

/// Typed rows for the history reader, batch by batch, in row order.
pub trait RowSource<'a>: Send {
    /// The names of the columns.
    fn header(&self) -> Header;
    /// The next batch (`None` at the end).
    #[allow(clippy::type_complexity)]
    fn next_batch(&mut self) -> Result<Option<Box<dyn Batch + 'a>>, Error>;
    /// How its rows are named in messages.
    fn naming(&self) -> RowNaming;
}

/// An age as a row holds it.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Age<'a> {
    /// Null, or no age column.
    Missing,
    /// Text, read like a field of a delimited extract.
    Text(&'a [u8]),
    /// A number: whole years, decimals truncated (79.9 is 79), readable
    /// from 0 to [`crate::score::MAX_AGE`] (130) like a text age; NaN counts
    /// as missing.
    Number(f64),
}

/// What an age value gives.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum AgeReading {
    Years(u32),
    Missing,
    Unreadable,
}

/// Reads an age value with the rules of [`read_age`]: the one place that
/// decides what an age is, for text and typed values alike.
///
/// ```
/// use morbus::rows::{read_age_value, Age, AgeReading};
/// assert_eq!(read_age_value(Age::Number(79.9)), AgeReading::Years(79));
/// assert_eq!(read_age_value(Age::Text(b" 80 ")), AgeReading::Years(80));
/// assert_eq!(read_age_value(Age::Number(f64::NAN)), AgeReading::Missing);
/// assert_eq!(read_age_value(Age::Number(-1.0)), AgeReading::Unreadable);
/// assert_eq!(read_age_value(Age::Text(b"131")), AgeReading::Unreadable);
/// assert_eq!(read_age_value(Age::Number(130.5)), AgeReading::Years(130));
/// assert_eq!(read_age_value(Age::Number(131.0)), AgeReading::Unreadable);
/// assert_eq!(read_age_value(Age::Number(4294967366.0)), AgeReading::Unreadable);
/// ```
pub fn read_age_value(age: Age<'_>) -> AgeReading {
    match age {
        Age::Missing => AgeReading::Missing,
        Age::Text(t) => match read_age(t) {
            Some(a) => AgeReading::Years(a),
            None if t.trim_ascii().is_empty() => AgeReading::Missing,
            None => AgeReading::Unreadable,
        },
        Age::Number(x) if x.is_nan() => AgeReading::Missing,
        Age::Number(x) => {
            if (0.0..(MAX_AGE + 1) as f64).contains(&x) {
                AgeReading::Years(x.trunc() as u32)
            } else {
                AgeReading::Unreadable
            }
        }
    }
}

/// An age value as shown in messages.
pub fn age_text(age: Age<'_>) -> String {
    match age {
        Age::Missing => String::new(),
        Age::Text(t) => String::from_utf8_lossy(t).into_owned(),
        Age::Number(x) => x.to_string(),
    }
}

/// Whether a typed date (days since 1970-01-01) is one a date field can
/// hold: years 1000 to 9999, as the text reader accepts.
pub fn typed_day(days: i64) -> Option<i32> {
    let lo = days_from_civil(1000, 1, 1).unwrap_or(i32::MIN) as i64;
    let hi = days_from_civil(9999, 12, 31).unwrap_or(i32::MAX) as i64;
    (lo..=hi).contains(&days).then_some(days as i32)
}
