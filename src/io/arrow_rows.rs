//! Arrow arrays as the engine's typed rows: the one reader of Arrow data,
//! for a Parquet input's record batches ([`ArrowBatch`], a
//! [`crate::rows::Batch`]) and for the Python package's frames, handed over
//! as Arrow arrays ([`ArrowFrame`], a [`crate::frame::Columns`]).
//!
//! Every Arrow type the engine reads has one typed reading
//! ([`crate::rows::Field`]): text and binary as their bytes; whole numbers
//! (an unsigned value beyond `i64::MAX` is an error naming its row);
//! floating-point numbers; decimals as whole numbers or numbers (at most 15
//! significant digits, else an error naming the row); true/false; dates
//! and timestamps as their day (in the timestamp's zone when it has one);
//! dictionaries as their values; a column of type `Null` as missing. Any
//! other type is refused, by name, before a row is read. No value is
//! written out as text to be read again.

use arrow_array::cast::AsArray;
use arrow_array::{Array, ArrayRef, RecordBatch};
use arrow_schema::DataType;

use crate::Error;

/// A record batch's columns, typed for reading row by row (a
/// [`crate::rows::Batch`]).
pub struct ArrowBatch {
    rows: usize,
    columns: Vec<ArrowColumn>,
    batch: RecordBatch,
}

/// One column of a record batch as the row model reads it.
pub(crate) enum ArrowColumn {
    Utf8(arrow_array::StringArray),
    LargeUtf8(arrow_array::LargeStringArray),
    Utf8View(arrow_array::StringViewArray),
    Binary(arrow_array::BinaryArray),
    LargeBinary(arrow_array::LargeBinaryArray),
    /// Signed and unsigned integers up to 32 bits, and 64-bit signed ones.
    Int(arrow_array::Int64Array),
    Float(arrow_array::Float64Array),
    Bool(arrow_array::BooleanArray),
    /// Dates and timestamps: the day (days since 1970-01-01).
    Days(Vec<Option<i64>>),
    /// A dictionary: each row's key into its values.
    Dictionary(Vec<Option<usize>>, Box<ArrowColumn>),
    BinaryView(arrow_array::BinaryViewArray),
    /// Fixed-size binary: each value's bytes, as text.
    FixedBinary(arrow_array::FixedSizeBinaryArray),
    /// Values read ahead, each to its own reading (decimals: whole numbers
    /// or numbers, see [`decimals`]).
    Values(Vec<crate::rows::Field<'static>>),
    /// A column of type `Null`: every value missing.
    Null,
    /// A column the run does not read (copied by the sink only).
    Unused,
}

impl ArrowBatch {
    /// The columns of `batch` (named `names`; `used`: those read, `None`:
    /// all), whose first row is row `first` (from 1) of the input.
    pub fn new(
        batch: &RecordBatch,
        names: &[String],
        used: Option<&[bool]>,
        first: u64,
    ) -> Result<ArrowBatch, Error> {
        let columns = batch
            .columns()
            .iter()
            .zip(names)
            .enumerate()
            .map(|(k, (a, name))| {
                if used.is_some_and(|u| !u.get(k).copied().unwrap_or(false)) {
                    Ok(ArrowColumn::Unused)
                } else {
                    ArrowColumn::new(a, name, first)
                }
            })
            .collect::<Result<Vec<_>, Error>>()?;
        Ok(ArrowBatch {
            rows: batch.num_rows(),
            columns,
            batch: batch.clone(),
        })
    }
}

/// Days since 1970-01-01 of a timestamp column's values: in its time zone
/// when it has one (a named zone or an offset), else as written.
fn timestamp_days(array: &dyn Array, name: &str) -> Result<Vec<Option<i64>>, Error> {
    use arrow_array::temporal_conversions::as_datetime_with_timezone;
    use arrow_array::timezone::Tz;
    use arrow_array::types::{
        ArrowTimestampType, TimestampMicrosecondType, TimestampMillisecondType,
        TimestampNanosecondType, TimestampSecondType,
    };
    use arrow_schema::TimeUnit;
    fn days<T: ArrowTimestampType>(
        array: &dyn Array,
        tz: Option<Tz>,
        per_day: i64,
    ) -> Vec<Option<i64>> {
        let a = array.as_primitive::<T>();
        (0..a.len())
            .map(|i| {
                if a.is_null(i) {
                    return None;
                }
                let v = a.value(i);
                match tz {
                    None => Some(v.div_euclid(per_day)),
                    Some(tz) => as_datetime_with_timezone::<T>(v, tz)
                        .map(|t| t.naive_local().and_utc().timestamp().div_euclid(86_400)),
                }
            })
            .collect()
    }
    let DataType::Timestamp(unit, zone) = array.data_type() else {
        unreachable!("a timestamp column");
    };
    let tz = match zone {
        None => None,
        Some(z) => Some(z.parse::<Tz>().map_err(|e| {
            Error::data(
                None,
                format!("column '{name}' has a time zone that cannot be read ({z}): {e}"),
            )
        })?),
    };
    Ok(match unit {
        TimeUnit::Second => days::<TimestampSecondType>(array, tz, 86_400),
        TimeUnit::Millisecond => days::<TimestampMillisecondType>(array, tz, 86_400_000),
        TimeUnit::Microsecond => days::<TimestampMicrosecondType>(array, tz, 86_400_000_000),
        TimeUnit::Nanosecond => days::<TimestampNanosecondType>(array, tz, 86_400_000_000_000),
    })
}

/// The most significant digits a decimal may have to be read as a number
/// (`f64`): every decimal of at most 15 digits is the only one of them
/// that reads as its nearest double, so that the double gives it back and
/// distinct decimals stay distinct.
const DECIMAL_DIGITS: u32 = 15;

/// Powers of ten that are exact doubles (10^0 to 10^22).
pub(crate) const EXACT_TENS: [f64; 23] = [
    1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11, 1e12, 1e13, 1e14, 1e15, 1e16,
    1e17, 1e18, 1e19, 1e20, 1e21, 1e22,
];

/// The double nearest to `m` * 10^`e` (`|m|` below 10^15, `e` from -22 to
/// 22: one correctly rounded operation of two exact doubles); `None`
/// beyond.
pub(crate) fn decimal_double(m: i128, e: i32) -> Option<f64> {
    if m.unsigned_abs() >= 10u128.pow(DECIMAL_DIGITS) {
        return None;
    }
    let ten = *EXACT_TENS.get(e.unsigned_abs() as usize)?;
    Some(if e >= 0 {
        m as f64 * ten
    } else {
        m as f64 / ten
    })
}

/// A decimal `raw` as `(m, t)` with `raw` = `m` * 10^`t` and `m` without
/// trailing zeros (0 stays 0).
pub(crate) fn strip_zeros(raw: i128) -> (i128, i32) {
    let (mut m, mut t) = (raw, 0);
    while m != 0 && m % 10 == 0 {
        m /= 10;
        t += 1;
    }
    (m, t)
}

/// The unscaled value of a 256-bit decimal.
pub(crate) type I256 =
    <arrow_array::types::Decimal256Type as arrow_array::ArrowPrimitiveType>::Native;

/// [`strip_zeros`] of a 256-bit decimal (`m` saturated to `i128::MAX` when
/// it has more digits than an `i128` holds: too many for a reading anyway).
pub(crate) fn strip_zeros_256(raw: I256) -> (i128, i32) {
    let ten = I256::from_i128(10);
    let (mut m, mut t) = (raw, 0);
    while m != I256::ZERO {
        match m.checked_div_rem(ten) {
            Some((q, r)) if r == I256::ZERO => {
                m = q;
                t += 1;
            }
            _ => break,
        }
    }
    (m.to_i128().unwrap_or(i128::MAX), t)
}

/// How a decimal `m` * 10^`t` of scale `scale` reads: a whole number
/// (`Integer`) when the scale is 0 or negative and it fits an `i64`, else a
/// number (`Number`, the nearest double) when it has at most 15 significant
/// digits (and its exponent is within 10^-22..10^22, where the nearest
/// double is one exact operation); `None` otherwise.
pub(crate) fn decimal_reading(m: i128, t: i32, scale: i8) -> Option<crate::rows::Field<'static>> {
    use crate::rows::Field as F;
    let e = t - i32::from(scale);
    if scale <= 0 {
        let whole = u32::try_from(e)
            .ok()
            .and_then(|e| 10i128.checked_pow(e))
            .and_then(|p| m.checked_mul(p))
            .and_then(|v| i64::try_from(v).ok());
        if let Some(v) = whole {
            return Some(F::Integer(v));
        }
    }
    decimal_double(m, e).map(F::Number)
}

/// The readings of a decimal column (see [`decimal_reading`]), whose first
/// row is row `first` of the input; a value with no reading is an error
/// naming its row. `parts` splits a value into [`strip_zeros`]'s `(m, t)`.
fn decimals<T: arrow_array::types::DecimalType>(
    a: &arrow_array::PrimitiveArray<T>,
    scale: i8,
    name: &str,
    first: u64,
    parts: impl Fn(T::Native) -> (i128, i32),
) -> Result<ArrowColumn, Error> {
    let mut values = Vec::with_capacity(a.len());
    for i in 0..a.len() {
        if a.is_null(i) {
            values.push(crate::rows::Field::Null);
            continue;
        }
        let raw = a.value(i);
        let (m, t) = parts(raw);
        let (m, t) = if t == 0 { strip_zeros(m) } else { (m, t) };
        match decimal_reading(m, t, scale) {
            Some(f) => values.push(f),
            None => {
                let shown = T::format_decimal(raw, T::MAX_PRECISION, scale);
                let digits = if m == 0 {
                    1
                } else {
                    m.unsigned_abs().ilog10() + 1
                };
                let why = if m == i128::MAX || digits > DECIMAL_DIGITS {
                    format!(
                        "which has more significant digits than the {DECIMAL_DIGITS} a number \
                         keeps exactly"
                    )
                } else {
                    "which is too large or too small to be read exactly as a number".to_string()
                };
                return Err(Error::data(
                    Some(first + i as u64),
                    format!(
                        "column '{name}' holds the decimal {shown}, {why}; cast the column to \
                         text (or round it to fewer digits)"
                    ),
                ));
            }
        }
    }
    Ok(ArrowColumn::Values(values))
}

/// The refusal of column `name`, of type `t`, that no reading of the
/// engine's holds.
fn unreadable_type(name: &str, t: &DataType) -> Error {
    let what = match t {
        DataType::Time32(_) | DataType::Time64(_) => "times of day".to_string(),
        DataType::Duration(_) => "durations".to_string(),
        DataType::Interval(_) => "intervals".to_string(),
        DataType::List(_)
        | DataType::LargeList(_)
        | DataType::ListView(_)
        | DataType::LargeListView(_)
        | DataType::FixedSizeList(..) => "lists".to_string(),
        DataType::Struct(_) => "structs".to_string(),
        DataType::Map(..) => "maps".to_string(),
        DataType::Union(..) => "unions".to_string(),
        DataType::RunEndEncoded(..) => "run-end encoded values".to_string(),
        other => format!("{other} values"),
    };
    Error::data(
        None,
        format!(
            "column '{name}' holds {what} ({t}), which morbus cannot read: it reads text, \
             whole or decimal numbers, true/false, dates and timestamps; cast the column to \
             one of these first"
        ),
    )
}

impl ArrowColumn {
    /// Column `name`'s `array`, whose first row is row `first` (1-based)
    /// of the input: a value no reading holds exactly (an unsigned whole
    /// number beyond `i64::MAX`, a decimal of more than 15 significant
    /// digits) is an error naming its row (`Error::data` with the row as its
    /// line, named by the source's [`crate::rows::RowNaming`]); a type with no
    /// reading is refused before any row is read.
    pub(crate) fn new(array: &ArrayRef, name: &str, first: u64) -> Result<ArrowColumn, Error> {
        use arrow_array::types::{
            Date32Type, Date64Type, Decimal128Type, Decimal256Type, Decimal32Type, Decimal64Type,
            UInt64Type,
        };
        let cast = |to: &DataType| {
            arrow_cast::cast(array, to)
                .map_err(|e| Error::data(None, format!("column '{name}' cannot be read: {e}")))
        };
        Ok(match array.data_type() {
            DataType::Null => ArrowColumn::Null,
            DataType::Utf8 => ArrowColumn::Utf8(array.as_string::<i32>().clone()),
            DataType::LargeUtf8 => ArrowColumn::LargeUtf8(array.as_string::<i64>().clone()),
            DataType::Utf8View => ArrowColumn::Utf8View(array.as_string_view().clone()),
            DataType::Binary => ArrowColumn::Binary(array.as_binary::<i32>().clone()),
            DataType::LargeBinary => ArrowColumn::LargeBinary(array.as_binary::<i64>().clone()),
            DataType::BinaryView => ArrowColumn::BinaryView(array.as_binary_view().clone()),
            DataType::FixedSizeBinary(_) => {
                ArrowColumn::FixedBinary(array.as_fixed_size_binary().clone())
            }
            DataType::Int8
            | DataType::Int16
            | DataType::Int32
            | DataType::Int64
            | DataType::UInt8
            | DataType::UInt16
            | DataType::UInt32 => ArrowColumn::Int(
                cast(&DataType::Int64)?
                    .as_primitive::<arrow_array::types::Int64Type>()
                    .clone(),
            ),
            DataType::UInt64 => {
                let a = array.as_primitive::<UInt64Type>();
                let too_large =
                    (0..a.len()).find(|&i| a.is_valid(i) && a.value(i) > i64::MAX as u64);
                if let Some(i) = too_large {
                    return Err(Error::data(
                        Some(first + i as u64),
                        format!(
                            "column '{name}' holds the whole number {}, beyond the largest \
                             whole number morbus reads ({}); cast the column to text",
                            a.value(i),
                            i64::MAX
                        ),
                    ));
                }
                // Every value fits: the cast keeps them all.
                ArrowColumn::Int(
                    cast(&DataType::Int64)?
                        .as_primitive::<arrow_array::types::Int64Type>()
                        .clone(),
                )
            }
            DataType::Float16 | DataType::Float32 | DataType::Float64 => ArrowColumn::Float(
                cast(&DataType::Float64)?
                    .as_primitive::<arrow_array::types::Float64Type>()
                    .clone(),
            ),
            DataType::Decimal32(_, scale) => {
                let a = array.as_primitive::<Decimal32Type>();
                decimals(a, *scale, name, first, |v| (i128::from(v), 0))?
            }
            DataType::Decimal64(_, scale) => {
                let a = array.as_primitive::<Decimal64Type>();
                decimals(a, *scale, name, first, |v| (i128::from(v), 0))?
            }
            DataType::Decimal128(_, scale) => {
                let a = array.as_primitive::<Decimal128Type>();
                decimals(a, *scale, name, first, strip_zeros)?
            }
            DataType::Decimal256(_, scale) => {
                let a = array.as_primitive::<Decimal256Type>();
                decimals(a, *scale, name, first, strip_zeros_256)?
            }
            DataType::Boolean => ArrowColumn::Bool(array.as_boolean().clone()),
            DataType::Date32 => {
                let a = array.as_primitive::<Date32Type>();
                ArrowColumn::Days(a.iter().map(|d| d.map(i64::from)).collect())
            }
            DataType::Date64 => {
                let a = array.as_primitive::<Date64Type>();
                ArrowColumn::Days(
                    a.iter()
                        .map(|d| d.map(|ms| ms.div_euclid(86_400_000)))
                        .collect(),
                )
            }
            DataType::Timestamp(..) => ArrowColumn::Days(timestamp_days(array.as_ref(), name)?),
            DataType::Dictionary(..) => {
                let d = array.as_any_dictionary();
                let keys = d.normalized_keys();
                // A dictionary's values are not rows: when one cannot be
                // read, the column is read unpacked, so that a value no row
                // holds stops nothing and one a row holds is named by it.
                let values = match ArrowColumn::new(d.values(), name, 1) {
                    Err(Error::Data { line: Some(_), .. }) => {
                        let at: arrow_array::UInt64Array = (0..array.len())
                            .map(|i| array.is_valid(i).then(|| keys[i] as u64))
                            .collect();
                        let plain = arrow_select::take::take(d.values().as_ref(), &at, None)
                            .map_err(|e| {
                                Error::data(None, format!("column '{name}' cannot be read: {e}"))
                            })?;
                        return ArrowColumn::new(&plain, name, first);
                    }
                    other => other?,
                };
                ArrowColumn::Dictionary(
                    (0..array.len())
                        .map(|i| array.is_valid(i).then(|| keys[i]))
                        .collect(),
                    Box::new(values),
                )
            }
            other => return Err(unreadable_type(name, other)),
        })
    }

    #[inline]
    pub(crate) fn field(&self, row: usize) -> crate::rows::Field<'_> {
        use crate::rows::Field;
        match self {
            ArrowColumn::Utf8(a) if a.is_valid(row) => Field::Text(a.value(row).as_bytes()),
            ArrowColumn::LargeUtf8(a) if a.is_valid(row) => Field::Text(a.value(row).as_bytes()),
            ArrowColumn::Utf8View(a) if a.is_valid(row) => Field::Text(a.value(row).as_bytes()),
            ArrowColumn::Binary(a) if a.is_valid(row) => Field::Text(a.value(row)),
            ArrowColumn::LargeBinary(a) if a.is_valid(row) => Field::Text(a.value(row)),
            ArrowColumn::Int(a) if a.is_valid(row) => Field::Integer(a.value(row)),
            ArrowColumn::Float(a) if a.is_valid(row) => Field::Number(a.value(row)),
            ArrowColumn::Bool(a) if a.is_valid(row) => Field::Logical(a.value(row)),
            ArrowColumn::Days(d) => d[row].map_or(Field::Null, Field::Date),
            ArrowColumn::Dictionary(keys, values) => {
                keys[row].map_or(Field::Null, |k| values.field(k))
            }
            ArrowColumn::BinaryView(a) if a.is_valid(row) => Field::Text(a.value(row)),
            ArrowColumn::FixedBinary(a) if a.is_valid(row) => Field::Text(a.value(row)),
            ArrowColumn::Values(v) => v[row],
            _ => Field::Null,
        }
    }
}

impl crate::rows::Batch for ArrowBatch {
    fn len(&self) -> usize {
        self.rows
    }
    #[inline]
    fn field(&self, col: usize, row: usize) -> crate::rows::Field<'_> {
        self.columns
            .get(col)
            .map_or(crate::rows::Field::Null, |c| c.field(row))
    }
    fn record_batch(&self) -> Option<&RecordBatch> {
        Some(&self.batch)
    }
}

impl ArrowColumn {
    /// What the column holds, as a frame's column kind.
    fn kind(&self) -> crate::rows::Kind {
        use crate::rows::{Field, Kind};
        match self {
            ArrowColumn::Utf8(_)
            | ArrowColumn::LargeUtf8(_)
            | ArrowColumn::Utf8View(_)
            | ArrowColumn::Binary(_)
            | ArrowColumn::LargeBinary(_)
            | ArrowColumn::BinaryView(_)
            | ArrowColumn::FixedBinary(_)
            | ArrowColumn::Null => Kind::Text,
            ArrowColumn::Int(_) => Kind::Integer,
            ArrowColumn::Float(_) => Kind::Number,
            ArrowColumn::Bool(_) => Kind::Logical,
            ArrowColumn::Days(_) => Kind::Date,
            ArrowColumn::Dictionary(_, values) => values.kind(),
            // Decimals: whole numbers when every value read as one.
            ArrowColumn::Values(v) => {
                if v.iter()
                    .all(|f| matches!(f, Field::Integer(_) | Field::Null))
                {
                    Kind::Integer
                } else {
                    Kind::Number
                }
            }
            ArrowColumn::Unused => Kind::Other,
        }
    }
}

/// The columns of a frame handed over as Arrow arrays (the Python
/// package's pandas, polars and Arrow frames), read by the same
/// [`ArrowColumn`]s as a Parquet input: frame column `c` is `cols[c]`,
/// `None` when the binding did not fetch it (a column the run does not
/// read).
pub struct ArrowFrame {
    rows: usize,
    cols: Vec<Option<(ArrowColumn, String)>>,
}

impl ArrowFrame {
    /// The frame's columns `used` (frame positions), fetched as the columns
    /// of `batch` in that order; `names` are all the frame's column names.
    /// A column with no value at all reads as missing whatever its type
    /// (a frame's empty column); an unreadable value is an error naming its
    /// row from 1 (see [`crate::rows::RowNaming`] to name it as the binding
    /// does).
    pub fn new(batch: &RecordBatch, names: &[String], used: &[usize]) -> Result<ArrowFrame, Error> {
        let mut cols: Vec<Option<(ArrowColumn, String)>> = (0..names.len()).map(|_| None).collect();
        for (k, &c) in used.iter().enumerate() {
            let (Some(a), Some(slot)) = (batch.columns().get(k), cols.get_mut(c)) else {
                return Err(Error::data(
                    None,
                    format!("internal error: frame column {c} was not fetched"),
                ));
            };
            let column = if a.null_count() == a.len() {
                ArrowColumn::Null
            } else {
                ArrowColumn::new(a, &names[c], 1)?
            };
            *slot = Some((column, type_name(a.data_type())));
        }
        Ok(ArrowFrame {
            rows: batch.num_rows(),
            cols,
        })
    }
}

/// An Arrow type as named in messages (`Int64`, `dictionary of Utf8`).
fn type_name(t: &DataType) -> String {
    match t {
        DataType::Dictionary(_, v) => format!("dictionary of {v}"),
        other => other.to_string(),
    }
}

impl crate::frame::Columns for ArrowFrame {
    fn rows(&self) -> usize {
        self.rows
    }

    fn kind(&self, col: usize) -> crate::rows::Kind {
        self.cols
            .get(col)
            .and_then(Option::as_ref)
            .map_or(crate::rows::Kind::Other, |c| c.0.kind())
    }

    fn type_name(&self, col: usize) -> String {
        self.cols
            .get(col)
            .and_then(Option::as_ref)
            .map_or_else(|| "unread".into(), |c| c.1.clone())
    }

    #[inline]
    fn field(&self, col: usize, row: usize) -> crate::rows::Field<'_> {
        match self.cols.get(col).and_then(Option::as_ref) {
            Some((c, _)) => c.field(row),
            None => crate::rows::Field::Null,
        }
    }
}
