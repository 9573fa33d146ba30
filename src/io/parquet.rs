//! Parquet in and out (feature `parquet`, on by default).
//!
//! Every command (`score` wide, long or with a lookback, `explain`,
//! `compare`) takes a Parquet input and `score` and `explain` write Parquet,
//! with the guarantees of the text path:
//!
//! - **In** ([`ParquetRows`]): the file's row groups are decoded batch by
//!   batch and read as typed rows ([`crate::rows`]): no text is made of
//!   them. Rows are named `row N of FILE` in messages.
//! - **Out, typed** ([`score_plain`]): a run without history scores the
//!   record batches on every core and writes, per batch, the input's own
//!   arrays (or, long layout, the id taken from them) followed by score
//!   arrays built from the values ([`score_arrays`]: whole-number scores
//!   `Int64`, scores with decimals `Float64`, condition flags `Int8`, bands
//!   text; missing values null), or the same as delimited text, the input's
//!   values formatted by Arrow's formatter ([`TypedOutput`]).
//! - **Out, from value records** ([`ParquetSink`]): a `score` history run
//!   (or a text input) hands each row over as a value record
//!   ([`super::value_records`]): its pass-through fields as delimited text
//!   and its scores as binary values, from which the score arrays are built
//!   ([`ValueColumns`]); no score is parsed from text. `explain` hands every
//!   cell of its records over as a value (row numbers, dates, weights with
//!   their decimals, text, and a typed input's id, episode and label values
//!   as their keys; [`ValueColumns::explain`]), none as delimited text. For
//!   a wide output of a Parquet input the input's own columns are copied
//!   from the input file itself, arrays and types untouched, in order;
//!   other kept columns of a typed input (the id and episode of the long
//!   layout, `explain`'s id, episode and labels) come as typed values and
//!   are built with the input's types ([`key_column`]). A wide history run
//!   with a text output joins the input's formatted rows to its score lines
//!   ([`JoinedText`]).
//!
//! ```
//! use std::io::Write;
//! use morbus::io::parquet::{OutputColumns, ParquetRows, ParquetSink, Source};
//! use morbus::io::value_records;
//! use morbus::rows::{Field, RowSource};
//!
//! // Write a small Parquet file through the sink, from value records whose
//! // rows are pass-through text only...
//! let dir = std::env::temp_dir().join(format!("morbus-doc-{}", std::process::id()));
//! std::fs::create_dir_all(&dir).unwrap();
//! let path = dir.join("tiny.parquet");
//! let file = std::fs::File::create(&path).unwrap();
//! let mut sink = ParquetSink::new(Box::new(file), b',', OutputColumns::default(), None);
//! let mut records = Vec::new();
//! value_records::start(&mut records);
//! for row in [&b"id,dx1"[..], b"A,I21.9", b"B,\"with, comma\""] {
//!     value_records::put_text(&mut records, row);
//! }
//! sink.write_all(&records).unwrap();
//! sink.finish().unwrap();
//!
//! // ... and read it back as typed rows.
//! let mut rows = ParquetRows::from_source(Source::File(path.clone()), None, "tiny.parquet").unwrap();
//! assert_eq!(rows.header().names, ["id", "dx1"]);
//! let batch = rows.next_batch().unwrap().unwrap();
//! assert_eq!(batch.field(1, 1), Field::Text(b"with, comma"));
//! # std::fs::remove_dir_all(&dir).unwrap();
//! ```

use std::collections::{HashMap, VecDeque};
use std::fs::File;
use std::io::{self, Read, Write};
use std::path::PathBuf;
use std::sync::Arc;

use arrow_array::builder::{
    Date32Builder, Float64Builder, Int64Builder, Int8Builder, StringBuilder,
};
use arrow_array::cast::AsArray;
use arrow_array::{Array, ArrayRef, RecordBatch, RecordBatchOptions};
use arrow_cast::display::{ArrayFormatter, FormatOptions};
use arrow_schema::{DataType, Field, Schema, SchemaRef};
use bytes::Bytes;
use parquet::arrow::arrow_reader::{ParquetRecordBatchReader, ParquetRecordBatchReaderBuilder};
use parquet::arrow::ProjectionMask;
use parquet::basic::{Compression, ZstdLevel};
use parquet::file::properties::WriterProperties;

use super::arrow_rows::{decimal_double, ArrowBatch, EXACT_TENS, I256};
use super::row_groups::{CopyWriter, GroupWriter};
use super::value_records::{self, Cell};
use super::write_field;
use crate::lists::{SCALE, SCALE_DECIMALS};
use crate::pipeline::Layout;
use crate::pipeline::ScoreConfig;
use crate::score::{ColumnKind, Engine, Value};
use crate::Error;

/// Rows per batch read from a Parquet input.
const BATCH_ROWS: usize = 8192;
/// Rows buffered by the sink before they are written (one row group each).
const GROUP_ROWS: usize = 131_072;
/// The bytes of rows being encoded at once, by default.
const ENCODING_BYTES: usize = 128 << 20;

thread_local! {
    /// Whether this thread is decoding Parquet (see [`quiet_decoder_panics`]).
    static DECODING: std::cell::Cell<bool> = const { std::cell::Cell::new(false) };
}

/// Runs a call into the Parquet decoder, turning a panic (the decoder
/// panics on some damaged files) into its message.
fn guarded<T>(f: impl FnOnce() -> T) -> Result<T, String> {
    let was = DECODING.with(|d| d.replace(true));
    let r = std::panic::catch_unwind(std::panic::AssertUnwindSafe(f));
    DECODING.with(|d| d.set(was));
    r.map_err(|p| {
        p.downcast_ref::<String>()
            .cloned()
            .or_else(|| p.downcast_ref::<&str>().map(|s| s.to_string()))
            .unwrap_or_else(|| "the decoder stopped".into())
    })
}

/// Keeps the panic messages of the Parquet decoder (caught and reported as
/// a damaged file) off standard error, leaving every other panic's message
/// as it was. For programs, such as the command line; a library leaves the
/// panic hook alone.
pub fn quiet_decoder_panics() {
    static ONCE: std::sync::Once = std::sync::Once::new();
    ONCE.call_once(|| {
        let previous = std::panic::take_hook();
        std::panic::set_hook(Box::new(move |info| {
            if !DECODING.with(|d| d.get()) {
                previous(info)
            }
        }));
    });
}

/// Where a Parquet input comes from: a file, or the bytes of standard input
/// (Parquet keeps its index at the end, so a stream is read whole first).
#[derive(Clone)]
pub enum Source {
    File(PathBuf),
    Memory(Bytes),
}

impl Source {
    /// The file's bytes, read as needed.
    fn chunks(&self) -> Result<Chunks, Error> {
        Ok(match self {
            Source::File(p) => Chunks::File(
                File::open(p).map_err(|e| Error::io(format!("cannot open {}", p.display()), e))?,
            ),
            Source::Memory(b) => Chunks::Memory(b.clone()),
        })
    }

    fn builder(&self) -> Result<ParquetRecordBatchReaderBuilder<Chunks>, Error> {
        let inner = self.chunks()?;
        guarded(|| ParquetRecordBatchReaderBuilder::try_new(inner))
            .map_err(|m| self.damaged(&m))?
            .map_err(|e| self.error(e))
    }

    fn damaged(&self, what: &str) -> Error {
        self.error(format!("the file is damaged ({what})"))
    }

    /// A reader of this source from its builder.
    fn build(
        &self,
        builder: ParquetRecordBatchReaderBuilder<Chunks>,
    ) -> Result<ParquetRecordBatchReader, Error> {
        guarded(|| builder.build())
            .map_err(|m| self.damaged(&m))?
            .map_err(|e| self.error(e))
    }

    /// The next batch of a reader of this source.
    fn next_batch(
        &self,
        reader: &mut ParquetRecordBatchReader,
    ) -> Result<Option<RecordBatch>, Error> {
        match guarded(|| reader.next()).map_err(|m| self.damaged(&m))? {
            None => Ok(None),
            Some(b) => b.map(Some).map_err(|e| self.error(e)),
        }
    }

    fn name(&self) -> String {
        match self {
            Source::File(p) => p.display().to_string(),
            Source::Memory(_) => "standard input".into(),
        }
    }

    fn error(&self, e: impl std::fmt::Display) -> Error {
        Error::data(None, format!("cannot read {} as Parquet: {e}", self.name()))
    }

    /// The rows of the file (its footer, read once per call).
    pub fn total_rows(&self) -> Result<u64, Error> {
        Ok(self.builder()?.metadata().file_metadata().num_rows().max(0) as u64)
    }

    /// The columns of the file (its footer, read once per call).
    pub fn schema(&self) -> Result<SchemaRef, Error> {
        Ok(self.builder()?.schema().clone())
    }
}

/// The bytes of a Parquet input, from a file or memory, as one type for
/// the reader.
enum Chunks {
    File(File),
    Memory(Bytes),
}

impl parquet::file::reader::Length for Chunks {
    fn len(&self) -> u64 {
        match self {
            Chunks::File(f) => f.len(),
            Chunks::Memory(b) => b.len() as u64,
        }
    }
}

impl parquet::file::reader::ChunkReader for Chunks {
    type T = Box<dyn Read + Send>;
    fn get_read(&self, start: u64) -> parquet::errors::Result<Self::T> {
        Ok(match self {
            Chunks::File(f) => Box::new(f.get_read(start)?),
            Chunks::Memory(b) => Box::new(b.get_read(start)?),
        })
    }
    fn get_bytes(&self, start: u64, length: usize) -> parquet::errors::Result<Bytes> {
        match self {
            Chunks::File(f) => f.get_bytes(start, length),
            Chunks::Memory(b) => b.get_bytes(start, length),
        }
    }
}

/// One column of a batch as text fields.
enum TextColumn<'a> {
    Utf8(&'a arrow_array::StringArray),
    LargeUtf8(&'a arrow_array::LargeStringArray),
    Utf8View(&'a arrow_array::StringViewArray),
    Binary(&'a arrow_array::BinaryArray),
    LargeBinary(&'a arrow_array::LargeBinaryArray),
    /// Anything else, in the ISO / shortest round-trip form of Arrow's
    /// formatter.
    Formatted(ArrayFormatter<'a>),
}

const FORMAT: FormatOptions<'static> = FormatOptions::new().with_display_error(false);

impl<'a> TextColumn<'a> {
    fn new(array: &'a dyn Array, name: &str) -> Result<TextColumn<'a>, Error> {
        Ok(match array.data_type() {
            DataType::Utf8 => TextColumn::Utf8(array.as_string::<i32>()),
            DataType::LargeUtf8 => TextColumn::LargeUtf8(array.as_string::<i64>()),
            DataType::Utf8View => TextColumn::Utf8View(array.as_string_view()),
            DataType::Binary => TextColumn::Binary(array.as_binary::<i32>()),
            DataType::LargeBinary => TextColumn::LargeBinary(array.as_binary::<i64>()),
            _ => TextColumn::Formatted(ArrayFormatter::try_new(array, &FORMAT).map_err(|e| {
                Error::data(
                    None,
                    format!(
                        "column '{name}' holds {} values, which cannot be written as text: {e}",
                        array.data_type()
                    ),
                )
            })?),
        })
    }

    #[inline]
    fn write(&self, row: usize, delimiter: u8, scratch: &mut String, out: &mut Vec<u8>) {
        let bytes: &[u8] = match self {
            TextColumn::Utf8(a) if a.is_valid(row) => a.value(row).as_bytes(),
            TextColumn::LargeUtf8(a) if a.is_valid(row) => a.value(row).as_bytes(),
            TextColumn::Utf8View(a) if a.is_valid(row) => a.value(row).as_bytes(),
            TextColumn::Binary(a) if a.is_valid(row) => a.value(row),
            TextColumn::LargeBinary(a) if a.is_valid(row) => a.value(row),
            TextColumn::Formatted(f) => {
                use std::fmt::Write as _;
                scratch.clear();
                // Formatting into a String cannot fail for a valid array.
                let _ = write!(scratch, "{}", f.value(row));
                scratch.as_bytes()
            }
            _ => b"",
        };
        write_field(bytes, delimiter, out);
    }
}

/// What a Parquet output knows of the columns it will be given.
#[derive(Clone, Debug, Default)]
pub struct OutputColumns {
    /// Types of the input's columns (a Parquet input), by name: kept columns
    /// handed over as typed values are built with them ([`key_column`]).
    pub input_types: HashMap<String, DataType>,
    /// The columns whose cells come as values ([`crate::io::value_records`]):
    /// the score columns of `score`, every column of `explain`. Columns
    /// named before them in the header come as the rows' delimited
    /// pass-through part.
    pub values: ValueColumns,
}

/// How each value column of an output is typed in Parquet, from the cells
/// handed over ([`Cell`]): whole-number scores `Int64`, scores with
/// decimals `Float64` (the value as written with its decimals), bands text,
/// condition flags `Int8`; `explain`'s row numbers `Int64`, dates `Date32`,
/// text `Utf8`, weights `Int64` (all whole) or `Float64`, and its id,
/// episode and label columns from their values: a typed input's typed
/// values ([`Cell::Key`]) with the input's types ([`key_column`]), a text
/// input's text as text. A missing value, and empty text, is null.
#[derive(Clone, Debug, Default)]
pub struct ValueColumns {
    columns: Vec<(String, ValueKind)>,
}

#[derive(Clone, Debug)]
enum ValueKind {
    /// A score or weight in whole points.
    Whole,
    /// A score truncated to a multiple of `step` (in `1/SCALE` points):
    /// the column's decimals.
    Decimal {
        step: i64,
    },
    /// A weight truncated to its own decimals (each value carries them).
    Number,
    /// The names of the specification's bands.
    Band(Vec<String>),
    Flag,
    /// A whole number (`explain`'s row numbers).
    Count,
    /// A date.
    Day,
    /// Text.
    Text,
    /// A column of the input: typed values ([`Cell::Key`]) built with the
    /// input's type (when known), or a text input's text.
    Kept(Option<DataType>),
}

/// A value column being built.
enum ColumnBuilder {
    Int64(Int64Builder),
    Float64(Float64Builder),
    Int8(Int8Builder),
    Date(Date32Builder),
    Text(StringBuilder),
    /// A kept column's values, as keys.
    Keys(KeyColumn),
}

impl ColumnBuilder {
    fn append_null(&mut self) {
        match self {
            ColumnBuilder::Int64(b) => b.append_null(),
            ColumnBuilder::Float64(b) => b.append_null(),
            ColumnBuilder::Int8(b) => b.append_null(),
            ColumnBuilder::Date(b) => b.append_null(),
            ColumnBuilder::Text(b) => b.append_null(),
            ColumnBuilder::Keys(k) => k.push(&[]),
        }
    }
}

/// A score's points truncated to `decimals`, as the text writes it
/// ([`crate::lists::format_scaled`]).
fn truncated(scaled: i64, decimals: u32) -> f64 {
    let step = 10i64.pow(SCALE_DECIMALS - decimals.min(SCALE_DECIMALS));
    (scaled / step * step) as f64 / SCALE as f64
}

impl ValueColumns {
    /// The score columns of `engine`.
    pub fn of(engine: &Engine) -> ValueColumns {
        let columns = engine
            .columns()
            .iter()
            .map(|c| {
                let kind = match c.kind {
                    ColumnKind::Score { spec } | ColumnKind::ScoreWithAge { spec } => {
                        match engine.decimals(spec) {
                            0 => ValueKind::Whole,
                            d => ValueKind::Decimal {
                                step: 10i64.pow(SCALE_DECIMALS - d.min(SCALE_DECIMALS)),
                            },
                        }
                    }
                    ColumnKind::Band { spec } => {
                        let s = &engine.specs()[spec];
                        let list = &engine.lists()[s.list].list;
                        ValueKind::Band(
                            list.weightings[s.weighting]
                                .bands
                                .iter()
                                .map(|b| b.name.clone())
                                .collect(),
                        )
                    }
                    ColumnKind::Flag { .. } => ValueKind::Flag,
                };
                (c.name.clone(), kind)
            })
            .collect();
        ValueColumns { columns }
    }

    /// The columns of `explain` ([`crate::pipeline::explain::EXPLAIN_COLUMNS`])
    /// after `kept` (the id, episode and label columns, with the input's
    /// type of each when known): rows as whole numbers, the source date as
    /// a date, the weight and age points as whole numbers when every index
    /// has whole weights (else as numbers with their decimals), the rest
    /// text.
    pub fn explain(engine: &Engine, kept: Vec<(String, Option<DataType>)>) -> ValueColumns {
        let whole = (0..engine.specs().len()).all(|s| engine.decimals(s) == 0);
        let weight = || {
            if whole {
                ValueKind::Whole
            } else {
                ValueKind::Number
            }
        };
        let mut columns: Vec<(String, ValueKind)> = kept
            .into_iter()
            .map(|(n, t)| (n, ValueKind::Kept(t)))
            .collect();
        for name in crate::pipeline::explain::EXPLAIN_COLUMNS {
            let kind = match name {
                "row" | "source_row" => ValueKind::Count,
                "source_date" => ValueKind::Day,
                "weight" | "age_points" => weight(),
                _ => ValueKind::Text,
            };
            columns.push((name.to_string(), kind));
        }
        ValueColumns { columns }
    }

    /// Values per row.
    pub fn len(&self) -> usize {
        self.columns.len()
    }

    /// Whether there are no value columns.
    pub fn is_empty(&self) -> bool {
        self.columns.is_empty()
    }

    /// The columns' names, in order.
    pub fn names(&self) -> impl Iterator<Item = &str> {
        self.columns.iter().map(|(n, _)| n.as_str())
    }

    /// Empty builders of the columns, for `rows` rows.
    fn builders(&self, rows: usize) -> Vec<ColumnBuilder> {
        self.columns
            .iter()
            .map(|(_, kind)| match kind {
                ValueKind::Whole | ValueKind::Count => {
                    ColumnBuilder::Int64(Int64Builder::with_capacity(rows))
                }
                ValueKind::Decimal { .. } | ValueKind::Number => {
                    ColumnBuilder::Float64(Float64Builder::with_capacity(rows))
                }
                ValueKind::Flag => ColumnBuilder::Int8(Int8Builder::with_capacity(rows)),
                ValueKind::Day => ColumnBuilder::Date(Date32Builder::with_capacity(rows)),
                ValueKind::Band(_) | ValueKind::Text => {
                    ColumnBuilder::Text(StringBuilder::with_capacity(rows, rows * 8))
                }
                ValueKind::Kept(_) => ColumnBuilder::Keys(KeyColumn::default()),
            })
            .collect()
    }

    /// Appends `cell` to column `j` (of `row`, for messages); a cell of
    /// another kind than the column's is an internal error. A score is read
    /// by its points (and, in a column of weights with their own decimals,
    /// its decimals), a band by its number: the column gives the rest.
    #[inline]
    fn append(
        &self,
        j: usize,
        b: &mut ColumnBuilder,
        cell: Cell<'_>,
        row: u64,
    ) -> Result<(), Error> {
        use ColumnBuilder as B;
        let (name, kind) = &self.columns[j];
        match (kind, b, cell) {
            (_, b, Cell::Value(Value::Missing)) => b.append_null(),
            (ValueKind::Whole, B::Int64(b), Cell::Value(Value::Score { scaled, .. })) => {
                b.append_value(scaled / SCALE)
            }
            (
                ValueKind::Decimal { step },
                B::Float64(b),
                Cell::Value(Value::Score { scaled, .. }),
            ) => b.append_value((scaled / step * step) as f64 / SCALE as f64),
            (ValueKind::Number, B::Float64(b), Cell::Value(Value::Score { scaled, decimals })) => {
                b.append_value(truncated(scaled, decimals))
            }
            (ValueKind::Band(names), B::Text(b), Cell::Value(Value::Band { band, .. })) => {
                match names.get(band as usize) {
                    Some(n) => b.append_value(n),
                    None => return Err(value_error(name, row, "a band of no known name")),
                }
            }
            (ValueKind::Flag, B::Int8(b), Cell::Value(Value::Flag(f))) => b.append_value(f as i8),
            (ValueKind::Count, B::Int64(b), Cell::Whole(x)) => b.append_value(x),
            (ValueKind::Day, B::Date(b), Cell::Date(d)) => b.append_value(d),
            (ValueKind::Text, B::Text(b), Cell::Text(t)) => {
                if t.is_empty() {
                    b.append_null()
                } else {
                    b.append_value(utf8(t, name, row)?)
                }
            }
            (ValueKind::Kept(_), B::Keys(k), Cell::Key(key)) => k.push(key),
            // A text input's value: text (empty text is missing).
            (ValueKind::Kept(_), B::Keys(k), Cell::Text(t)) => {
                k.push_field(crate::rows::Field::Text(utf8(t, name, row)?.as_bytes()))
            }
            _ => return Err(value_error(name, row, "a value of another kind")),
        }
        Ok(())
    }

    /// The Arrow fields and arrays of the columns built in `builders`.
    fn finish(&self, builders: &mut [ColumnBuilder]) -> Vec<(Field, ArrayRef)> {
        self.columns
            .iter()
            .zip(builders)
            .map(|((name, kind), b)| {
                let array: ArrayRef = match b {
                    ColumnBuilder::Int64(b) => Arc::new(b.finish()),
                    ColumnBuilder::Float64(b) => Arc::new(b.finish()),
                    ColumnBuilder::Int8(b) => Arc::new(b.finish()),
                    ColumnBuilder::Date(b) => Arc::new(b.finish()),
                    ColumnBuilder::Text(b) => Arc::new(b.finish()),
                    ColumnBuilder::Keys(k) => match kind {
                        ValueKind::Kept(t) => k.array(t),
                        _ => k.array(&None),
                    },
                };
                (
                    Field::new(name.as_str(), array.data_type().clone(), true),
                    array,
                )
            })
            .collect()
    }

    /// The Arrow fields and arrays of `rows` rows whose score values are
    /// `values` ([`Self::len`] per row), built as the sink builds them from
    /// value records.
    pub fn arrays(&self, values: &[Value], rows: usize) -> Result<Vec<(Field, ArrayRef)>, Error> {
        let w = self.columns.len();
        let mut builders = self.builders(rows);
        for (j, b) in builders.iter_mut().enumerate() {
            for i in 0..rows {
                self.append(j, b, Cell::Value(values[i * w + j]), i as u64 + 1)?;
            }
        }
        Ok(self.finish(&mut builders))
    }
}

/// `v` as text, or the error of a value that is not UTF-8 (a Parquet text
/// column must be).
fn utf8<'v>(v: &'v [u8], name: &str, row: u64) -> Result<&'v str, Error> {
    std::str::from_utf8(v).map_err(|_| {
        Error::data(
            None,
            format!(
                "row {row}, column '{name}': the value is not UTF-8 text, which a \
                 Parquet text column must be (write CSV instead, or convert the \
                 input to UTF-8)"
            ),
        )
    })
}

fn value_error(name: &str, row: u64, what: &str) -> Error {
    Error::data(
        None,
        format!("internal error: row {row}, column '{name}' of the output was given {what}"),
    )
}

/// A [`Write`] that takes the pipeline's output as value records
/// ([`value_records`]: the cells of [`OutputColumns::values`] typed, any
/// columns before them as delimited pass-through text), or typed record
/// batches ([`ParquetSink::write_batch`]), and writes it as Parquet (see
/// the module documentation). [`ParquetSink::finish`] writes the file's
/// footer; without it the file is incomplete.
pub struct ParquetSink {
    /// The thread that copies the input's columns, encodes and writes;
    /// started with the first rows handed over (see [`ParquetSink::with_encoding`]).
    background: Option<Background>,
    /// The output and the input to copy columns from, until the thread starts.
    waiting: Option<(Box<dyn Write + Send>, Option<Source>)>,
    /// Row groups encoded at once, and the bytes their rows may hold.
    encoding: (usize, usize),
    /// Whether the input's columns are copied (then the text's are not kept).
    copies: bool,
    columns: OutputColumns,
    csv: csv_core::Reader,
    fields: Vec<u8>,
    ends: Vec<usize>,
    nfield: usize,
    nend: usize,
    header: Option<Header>,
    rows: usize,
    /// Rows written, for messages.
    written: u64,
    /// Batches handed to the background thread.
    batches: u64,
    /// Rows per batch handed over.
    group_rows: usize,
    failed: Option<String>,
    /// The value records being read, the value columns of the rows taken
    /// so far, and how many of the header's columns come as text before
    /// the value columns.
    records: value_records::Reader,
    values: Vec<ColumnBuilder>,
    text_columns: usize,
    /// Whether the value records' pass-through parts are typed values
    /// ([`value_records::MAGIC_KEYS`]).
    keys: bool,
}

/// Encoding and writing on a thread of its own, so that it runs beside the
/// pipeline: takes batches of the text's columns, puts the copied input
/// columns in front of them, and writes.
struct Background {
    batches: Option<std::sync::mpsc::SyncSender<RecordBatch>>,
    thread: Option<std::thread::JoinHandle<Result<(), Error>>>,
    /// Set when the sink is dropped unfinished (the run failed): the file
    /// then gets no footer, so that it cannot pass for a complete one.
    abandoned: Arc<std::sync::atomic::AtomicBool>,
}

impl Background {
    fn start(
        out: Box<dyn Write + Send>,
        passthrough: Option<Source>,
        encoding: (usize, usize),
    ) -> Background {
        let (tx, rx) = std::sync::mpsc::sync_channel::<RecordBatch>(2);
        let abandoned = Arc::new(std::sync::atomic::AtomicBool::new(false));
        let stop = abandoned.clone();
        let thread = std::thread::spawn(move || -> Result<(), Error> {
            let mut out = Some(out);
            let mut passthrough = passthrough;
            let mut writing: Option<Writing> = None;
            for batch in rx {
                if writing.is_none() {
                    let out = out.take().expect("an output");
                    writing = Some(Writing::open(
                        out,
                        passthrough.take(),
                        batch.schema(),
                        encoding,
                    )?);
                }
                match writing.as_mut().expect("a writer") {
                    Writing::Copied(w, _) => w.write(batch).map_err(parquet_write_error)?,
                    Writing::Encoded(w, copies) => {
                        let batch = match copies.as_mut() {
                            None => batch,
                            Some(p) => p.in_front(batch)?,
                        };
                        w.write(batch).map_err(parquet_write_error)?
                    }
                }
            }
            if stop.load(std::sync::atomic::Ordering::SeqCst) {
                return Ok(());
            }
            let out = match writing {
                None => return Ok(()),
                Some(Writing::Copied(w, source)) => w.finish().map_err(|e| match e {
                    parquet::errors::ParquetError::General(m) => {
                        Error::data(None, format!("internal error: {m} ({})", source.name()))
                    }
                    e => parquet_write_error(e),
                })?,
                Some(Writing::Encoded(w, mut copies)) => {
                    if let Some(p) = copies.as_mut() {
                        if !p.exhausted() {
                            return Err(Error::data(
                                None,
                                format!(
                                    "internal error: the output has fewer rows than {}",
                                    p.source.name()
                                ),
                            ));
                        }
                    }
                    w.finish().map_err(parquet_write_error)?
                }
            };
            let mut out = out;
            out.flush()
                .map_err(|e| Error::io("cannot write the Parquet output", e))?;
            Ok(())
        });
        Background {
            batches: Some(tx),
            thread: Some(thread),
            abandoned,
        }
    }

    /// Hands over a batch; the thread's error if it has stopped.
    fn send(&mut self, batch: RecordBatch) -> Result<(), Error> {
        let sent = self.batches.as_ref().map(|tx| tx.send(batch));
        match sent {
            Some(Ok(())) => Ok(()),
            _ => Err(self.join().err().unwrap_or_else(|| {
                Error::data(
                    None,
                    "internal error: the Parquet writer stopped".to_string(),
                )
            })),
        }
    }

    /// Waits for the thread to write everything.
    fn join(&mut self) -> Result<(), Error> {
        self.batches = None;
        match self.thread.take() {
            Some(t) => t.join().unwrap_or_else(|_| {
                Err(Error::data(
                    None,
                    "internal error: the Parquet writer failed".to_string(),
                ))
            }),
            None => Ok(()),
        }
    }
}

/// How the background thread writes the file.
enum Writing {
    /// Every column encoded; the input's columns, when copied, decoded from
    /// the input first ([`PassthroughRows`]).
    Encoded(GroupWriter<Box<dyn Write + Send>>, Option<PassthroughRows>),
    /// The input's columns copied into the file as they are encoded in the
    /// input, row group for row group; only the score columns are encoded.
    Copied(CopyWriter<Box<dyn Write + Send>, Chunks>, Source),
}

/// How a pass-through column of the header is built.
enum Builder {
    /// A kept column handed over as delimited text: text.
    Kept(String, StringBuilder),
    /// A kept column handed over as typed values (value records of a typed
    /// source, [`value_records::MAGIC_KEYS`]): the values' keys, built into
    /// an array of the input's type ([`key_column`]).
    Keys(String, KeyColumn, Option<DataType>),
}

/// The keys ([`crate::rows::Field::value_into`]) of a kept column's rows.
#[derive(Default)]
struct KeyColumn {
    bytes: Vec<u8>,
    ends: Vec<usize>,
}

impl KeyColumn {
    fn push(&mut self, key: &[u8]) {
        self.bytes.extend_from_slice(key);
        self.ends.push(self.bytes.len());
    }

    /// Takes a value as its key ([`crate::rows::Field::value_into`]).
    fn push_field(&mut self, f: crate::rows::Field<'_>) {
        f.value_into(&mut self.bytes);
        self.ends.push(self.bytes.len());
    }

    /// The values taken so far as an array of the input's type `input`
    /// ([`key_column`]); the column is left empty.
    fn array(&mut self, input: &Option<DataType>) -> ArrayRef {
        let a = key_column(&self.finish(), input);
        self.bytes.clear();
        a
    }

    /// The values taken so far (the column is left empty).
    fn finish(&mut self) -> Vec<crate::rows::Field<'_>> {
        let mut s = 0;
        let fields = self
            .ends
            .iter()
            .map(|&t| {
                let f = crate::rows::key_field(&self.bytes[s..t]);
                s = t;
                f
            })
            .collect();
        self.ends.clear();
        fields
    }
}

impl Writing {
    /// The writer of a file whose columns are those of `batches` (the
    /// pipeline's), after those of `passthrough` when there is one. A
    /// Parquet input's columns are copied as encoded when its Parquet types
    /// are the ones they would be written with; else decoded and encoded.
    fn open(
        out: Box<dyn Write + Send>,
        passthrough: Option<Source>,
        batches: SchemaRef,
        encoding: (usize, usize),
    ) -> Result<Writing, Error> {
        let cannot = |e| Error::data(None, format!("cannot write Parquet: {e}"));
        let Some(source) = passthrough else {
            let w = GroupWriter::try_new(out, batches, writer_properties(), encoding)
                .map_err(cannot)?;
            return Ok(Writing::Encoded(w, None));
        };
        let builder = source.builder()?;
        let input = (
            source.chunks()?,
            builder.metadata().clone(),
            builder.schema().as_ref(),
        );
        let out = match CopyWriter::try_new(out, input, batches.clone(), writer_properties())
            .map_err(cannot)?
        {
            Ok(w) => return Ok(Writing::Copied(w, source)),
            Err(out) => out,
        };
        let copies = PassthroughRows::new(source, builder)?;
        let mut fields: Vec<Field> = copies
            .schema
            .fields()
            .iter()
            .map(|f| f.as_ref().clone())
            .collect();
        fields.extend(batches.fields().iter().map(|f| f.as_ref().clone()));
        let w = GroupWriter::try_new(
            out,
            Arc::new(Schema::new(fields)),
            writer_properties(),
            encoding,
        )
        .map_err(cannot)?;
        Ok(Writing::Encoded(w, Some(copies)))
    }
}

struct Header {
    /// Per pass-through column: its builder, or `None` when the column is
    /// left out (a copied input column).
    builders: Vec<Option<Builder>>,
}

/// The rows of a Parquet input, read alongside the output.
struct PassthroughRows {
    source: Source,
    reader: ParquetRecordBatchReader,
    schema: SchemaRef,
    queue: VecDeque<RecordBatch>,
    queued: usize,
}

impl PassthroughRows {
    fn new(
        source: Source,
        builder: ParquetRecordBatchReaderBuilder<Chunks>,
    ) -> Result<Self, Error> {
        let builder = builder.with_batch_size(BATCH_ROWS);
        let schema = builder.schema().clone();
        let reader = source.build(builder)?;
        Ok(PassthroughRows {
            source,
            reader,
            schema,
            queue: VecDeque::new(),
            queued: 0,
        })
    }

    /// `batch` with the input's next rows' columns in front of its own.
    fn in_front(&mut self, batch: RecordBatch) -> Result<RecordBatch, Error> {
        let copied = self.take(batch.num_rows())?;
        let mut fields: Vec<Field> = copied
            .schema()
            .fields()
            .iter()
            .map(|f| f.as_ref().clone())
            .collect();
        let mut arrays = copied.columns().to_vec();
        fields.extend(batch.schema().fields().iter().map(|f| f.as_ref().clone()));
        arrays.extend(batch.columns().iter().cloned());
        RecordBatch::try_new_with_options(
            Arc::new(Schema::new(fields)),
            arrays,
            &RecordBatchOptions::new().with_row_count(Some(batch.num_rows())),
        )
        .map_err(|e| Error::data(None, format!("internal error: {e}")))
    }

    /// The next `n` rows of the input.
    fn take(&mut self, n: usize) -> Result<RecordBatch, Error> {
        while self.queued < n {
            match self.source.next_batch(&mut self.reader)? {
                Some(b) => {
                    self.queued += b.num_rows();
                    self.queue.push_back(b);
                }
                None => {
                    return Err(Error::data(
                        None,
                        format!(
                            "internal error: the output has more rows than {}",
                            self.source.name()
                        ),
                    ))
                }
            }
        }
        let mut parts = Vec::new();
        let mut need = n;
        while need > 0 {
            let b = self.queue.pop_front().expect("queued rows");
            if b.num_rows() <= need {
                need -= b.num_rows();
                parts.push(b);
            } else {
                parts.push(b.slice(0, need));
                self.queue.push_front(b.slice(need, b.num_rows() - need));
                need = 0;
            }
        }
        self.queued -= n;
        arrow_select::concat::concat_batches(&self.schema, &parts)
            .map_err(|e| Error::data(None, format!("internal error: {e}")))
    }

    fn exhausted(&mut self) -> bool {
        self.queued == 0 && matches!(self.source.next_batch(&mut self.reader), Ok(None))
    }
}

impl ParquetSink {
    /// A sink writing Parquet to `out`, reading pass-through text with
    /// `delimiter`. `passthrough` (for a wide output of a Parquet input:
    /// its rows are the input's rows) copies the input's columns from the
    /// input itself; the rows then bring no pass-through text.
    pub fn new(
        out: Box<dyn Write + Send>,
        delimiter: u8,
        columns: OutputColumns,
        passthrough: Option<Source>,
    ) -> ParquetSink {
        ParquetSink {
            copies: passthrough.is_some(),
            background: None,
            waiting: Some((out, passthrough)),
            encoding: (
                std::thread::available_parallelism().map_or(1, |n| n.get()),
                ENCODING_BYTES,
            ),
            records: value_records::Reader::new(columns.values.len()),
            values: columns.values.builders(0),
            text_columns: 0,
            keys: false,
            columns,
            csv: csv_core::ReaderBuilder::new().delimiter(delimiter).build(),
            fields: vec![0; 1 << 12],
            ends: vec![0; 64],
            nfield: 0,
            nend: 0,
            header: None,
            rows: 0,
            written: 0,
            batches: 0,
            group_rows: GROUP_ROWS,
            failed: None,
        }
    }

    /// Row groups encoded at once, each on a thread of its own (by default
    /// one per core), while their rows hold at most `bytes` (by default 128
    /// MiB; one row group is always let through). More use more memory and,
    /// with cores to spare, write sooner. The file is the same byte for byte.
    pub fn with_encoding(mut self, threads: usize, bytes: usize) -> Self {
        self.encoding = (threads.max(1), bytes);
        self
    }

    /// The thread that encodes and writes, started on first use.
    fn writer(&mut self) -> &mut Background {
        let encoding = self.encoding;
        let waiting = &mut self.waiting;
        self.background.get_or_insert_with(|| {
            let (out, passthrough) = waiting.take().expect("an output not yet handed over");
            Background::start(out, passthrough, encoding)
        })
    }

    /// Rows taken before they are handed to the writer (131,072 by
    /// default); smaller values use less memory and make smaller row
    /// groups.
    pub fn with_group_rows(mut self, rows: usize) -> Self {
        self.group_rows = rows.max(1);
        self
    }

    /// Starts the output's pass-through columns, named `names`.
    fn start(&mut self, names: Vec<String>) {
        let builders = names
            .into_iter()
            .map(|name| {
                if self.copies {
                    return None;
                }
                Some(if self.keys {
                    let t = self.columns.input_types.get(&name).cloned();
                    Builder::Keys(name, KeyColumn::default(), t)
                } else {
                    Builder::Kept(name, StringBuilder::new())
                })
            })
            .collect();
        self.header = Some(Header { builders });
    }

    /// The fields of the record read last.
    fn names(&self) -> Vec<String> {
        let fields = &self.fields[..self.nfield];
        let ends = &self.ends[..self.nend];
        (0..ends.len())
            .map(|k| {
                let from = if k == 0 { 0 } else { ends[k - 1] };
                String::from_utf8_lossy(&fields[from..ends[k]]).into_owned()
            })
            .collect()
    }

    /// Counts a row taken; a full group is written.
    fn end_row(&mut self) -> Result<(), Error> {
        self.rows += 1;
        if self.rows >= self.group_rows {
            self.flush_rows()?;
        }
        Ok(())
    }

    /// Puts the fields of the record read last into their columns.
    fn take_fields(&mut self) -> Result<(), Error> {
        let fields = &self.fields[..self.nfield];
        let ends = &self.ends[..self.nend];
        let field = |k: usize| &fields[if k == 0 { 0 } else { ends[k - 1] }..ends[k]];
        let Some(header) = self.header.as_mut() else {
            return Err(self.internal("a row before its header"));
        };
        if ends.len() != header.builders.len() {
            return Err(self.internal("a record of another width"));
        }
        let row = self.written + self.rows as u64 + 1;
        let self_internal =
            |what: &str| Error::data(None, format!("internal error: the output held {what}"));
        for (k, b) in header.builders.iter_mut().enumerate() {
            let v = field(k);
            match b {
                None => {}
                Some(Builder::Keys(..)) => return Err(self_internal("text for typed values")),
                Some(Builder::Kept(name, b)) => {
                    if v.is_empty() {
                        b.append_null()
                    } else {
                        b.append_value(utf8(v, name, row)?)
                    }
                }
            }
        }
        Ok(())
    }

    /// One step of the delimited-text reader over `input`: the fields read
    /// are added to the record being read (across calls), its buffers grown
    /// when full. Returns what stopped it and the bytes it took.
    fn csv_step(&mut self, input: &[u8]) -> (csv_core::ReadRecordResult, usize) {
        use csv_core::ReadRecordResult as R;
        let (res, nin, nout, nend) = self.csv.read_record(
            input,
            &mut self.fields[self.nfield..],
            &mut self.ends[self.nend..],
        );
        // Field ends count from the start of the record, across calls.
        self.nfield += nout;
        self.nend += nend;
        match res {
            R::OutputFull => {
                let n = self.fields.len();
                self.fields.resize(n * 2, 0);
            }
            R::OutputEndsFull => {
                let n = self.ends.len();
                self.ends.resize(n * 2, 0);
            }
            _ => {}
        }
        (res, nin)
    }

    /// Reads `text` (one delimited record with no line end) into the
    /// fields of the record read last.
    fn read_text(&mut self, mut text: &[u8]) -> Result<(), Error> {
        use csv_core::ReadRecordResult as R;
        self.nfield = 0;
        self.nend = 0;
        let mut ended = false;
        loop {
            let (res, n) = self.csv_step(text);
            text = &text[n..];
            match res {
                R::InputEmpty if !ended => {
                    // The record's end.
                    text = b"\n";
                    ended = true;
                }
                R::OutputFull | R::OutputEndsFull => {}
                R::Record if ended && text.is_empty() => return Ok(()),
                _ => return Err(self.internal("a row that is not one record")),
            }
        }
    }

    /// Takes the value records in `input` (see [`value_records`]).
    fn feed_records(&mut self, input: &[u8]) -> Result<(), Error> {
        let mut reader = std::mem::replace(&mut self.records, value_records::Reader::new(0));
        let r = reader.feed(input, |record| match record {
            value_records::Record::Header(text) | value_records::Record::KeysHeader(text) => {
                // Whether the rows' pass-through parts are typed values.
                self.keys = matches!(record, value_records::Record::KeysHeader(_));
                self.read_text(text)?;
                let names = self.names();
                let values = &self.columns.values;
                let text_columns = names.len().checked_sub(values.len());
                let ok = text_columns
                    .is_some_and(|t| names[t..].iter().map(String::as_str).eq(values.names()));
                if !ok {
                    return Err(self.internal("a header that does not end with the value columns"));
                }
                self.text_columns = text_columns.unwrap_or(0);
                self.start(names[..self.text_columns].to_vec());
                Ok(())
            }
            value_records::Record::Row(mut text, cells) if self.keys => {
                let width = || {
                    Error::data(
                        None,
                        "internal error: the output held typed values of another width",
                    )
                };
                let Some(header) = self.header.as_mut() else {
                    return Err(self.internal("a row before its header"));
                };
                let mut other = false;
                for b in header.builders.iter_mut() {
                    let key = value_records::next_key(&mut text).ok_or_else(width)?;
                    match b {
                        Some(Builder::Keys(_, column, _)) => column.push(key),
                        None => {}
                        Some(_) => other = true,
                    }
                }
                if other {
                    return Err(self.internal("typed values for a text column"));
                }
                if !text.is_empty() {
                    return Err(width());
                }
                let row = self.written + self.rows as u64 + 1;
                for (j, (b, &cell)) in self.values.iter_mut().zip(cells).enumerate() {
                    self.columns.values.append(j, b, cell, row)?;
                }
                self.end_row()
            }
            value_records::Record::Row(text, cells) => {
                match self.text_columns {
                    0 if text.is_empty() => {}
                    0 => return Err(self.internal("text where no column was named")),
                    // A single empty field (a line that would read as blank).
                    1 if text.is_empty() => {
                        self.nfield = 0;
                        self.nend = 1;
                        self.ends[0] = 0;
                    }
                    _ => self.read_text(text)?,
                }
                if self.text_columns > 0 {
                    self.take_fields()?;
                }
                let row = self.written + self.rows as u64 + 1;
                for (j, (b, &cell)) in self.values.iter_mut().zip(cells).enumerate() {
                    self.columns.values.append(j, b, cell, row)?;
                }
                self.end_row()
            }
        });
        self.records = reader;
        r
    }

    fn internal(&self, what: &str) -> Error {
        Error::data(None, format!("internal error: the output held {what}"))
    }

    /// Writes the rows taken so far as one row group.
    fn flush_rows(&mut self) -> Result<(), Error> {
        let Some(header) = self.header.as_mut() else {
            return Ok(());
        };
        // An empty output still gets its columns (one empty batch).
        if self.rows == 0 && self.batches > 0 {
            return Ok(());
        }
        let rows = self.rows;
        let mut fields: Vec<Field> = Vec::new();
        let mut arrays: Vec<ArrayRef> = Vec::new();
        for b in header.builders.iter_mut().flatten() {
            let (name, a): (&str, ArrayRef) = match b {
                Builder::Kept(n, b) => (n.as_str(), Arc::new(b.finish()) as ArrayRef),
                Builder::Keys(n, column, t) => (n.as_str(), column.array(t)),
            };
            fields.push(Field::new(name, a.data_type().clone(), true));
            arrays.push(a);
        }
        for (f, a) in self.columns.values.finish(&mut self.values) {
            fields.push(f);
            arrays.push(a);
        }
        let batch = RecordBatch::try_new_with_options(
            Arc::new(Schema::new(fields)),
            arrays,
            &RecordBatchOptions::new().with_row_count(Some(rows)),
        )
        .map_err(|e| Error::data(None, format!("internal error: {e}")))?;
        self.writer().send(batch)?;
        self.batches += 1;
        self.written += rows as u64;
        self.rows = 0;
        Ok(())
    }

    /// Writes a batch built by a typed run (input columns and score columns
    /// as they go into the file); a sink takes either such batches or value
    /// records.
    pub fn write_batch(&mut self, batch: RecordBatch) -> Result<(), Error> {
        if self.header.is_some() || self.copies {
            return Err(self.internal("typed batches after value records"));
        }
        let rows = batch.num_rows() as u64;
        self.writer().send(batch)?;
        self.batches += 1;
        self.written += rows;
        Ok(())
    }

    /// Writes what is left and the file's footer.
    pub fn finish(mut self) -> Result<(), Error> {
        if let Some(m) = self.failed.take() {
            return Err(Error::data(None, m));
        }
        if !self.records.complete() {
            return Err(self.internal("value records cut short"));
        }
        if self.header.is_none() && self.batches > 0 {
            // Typed batches only: all written.
            self.writer();
            let mut b = self.background.take().expect("a writer thread");
            return b.join();
        }
        if self.header.is_none() {
            // Nothing written at all (an empty input): a file with the
            // value columns only.
            self.start(Vec::new());
        }
        self.flush_rows()?;
        self.writer();
        let mut b = self.background.take().expect("a writer thread");
        b.join()
    }
}

/// How morbus writes Parquet: zstd (level 1) compression, row groups of
/// 131,072 rows.
pub fn writer_properties() -> WriterProperties {
    WriterProperties::builder()
        .set_compression(Compression::ZSTD(ZstdLevel::try_new(1).expect("level 1")))
        .set_max_row_group_row_count(Some(GROUP_ROWS))
        .build()
}

fn parquet_write_error(e: parquet::errors::ParquetError) -> Error {
    match e {
        parquet::errors::ParquetError::External(inner) => match inner.downcast::<io::Error>() {
            Ok(io) => Error::io("cannot write the Parquet output", *io),
            Err(other) => Error::data(None, format!("cannot write Parquet: {other}")),
        },
        other => Error::data(None, format!("cannot write Parquet: {other}")),
    }
}

/// A kept column handed over as typed values (the long layout's id,
/// episode and kept columns of a typed source, `explain`'s id, episode and
/// label columns), as an array of the input's
/// type `input`: the values as the row model read them (text, whole
/// numbers `Int64`, numbers `Float64`, true/false, dates `Date32`), cast to
/// the input's type where that gives them back exactly (narrower integers
/// and floating-point numbers, `Date64`, other text and binary types,
/// dictionaries). A timestamp column was read as its day and stays a
/// `Date32` of that day; unsigned 64-bit integers, read as whole numbers
/// up to `i64::MAX`, are cast back to `UInt64`; a decimal column's whole
/// numbers and numbers are the decimals they were read from
/// ([`decimal_column`]).
fn key_column(fields: &[crate::rows::Field<'_>], input: &Option<DataType>) -> ArrayRef {
    use crate::rows::Field as F;
    use arrow_array::builder::{BinaryBuilder, BooleanBuilder};
    let rows = fields.len();
    if let Some(a) = input.as_ref().and_then(|t| decimal_column(fields, t)) {
        return a;
    }
    let kind = |f: &F<'_>| -> u8 {
        match f {
            F::Null => 0,
            F::Text(_) => 1,
            F::Integer(_) => 2,
            F::Number(_) => 3,
            F::Logical(_) => 4,
            F::Date(_) => 5,
        }
    };
    let first = fields.iter().find(|f| !matches!(f, F::Null));
    let mixed = first.is_some_and(|a| {
        fields
            .iter()
            .any(|f| !matches!(f, F::Null) && kind(f) != kind(a))
    });
    let natural: ArrayRef = match first {
        None => {
            return match input {
                Some(t) => arrow_array::new_null_array(t, rows),
                None => arrow_array::new_null_array(&DataType::Utf8, rows),
            }
        }
        // Values of more than one kind (a column's are all of one kind):
        // their text.
        Some(_) if mixed => {
            let mut b = StringBuilder::with_capacity(rows, rows * 8);
            for f in fields {
                match f.text() {
                    Some(t) => b.append_value(String::from_utf8_lossy(&t)),
                    None => b.append_null(),
                }
            }
            Arc::new(b.finish())
        }
        Some(F::Text(_)) => {
            let utf8 = fields.iter().all(|f| match f {
                F::Text(t) => std::str::from_utf8(t).is_ok(),
                _ => true,
            });
            if utf8 {
                let mut b = StringBuilder::with_capacity(rows, rows * 8);
                for f in fields {
                    match f {
                        F::Text(t) => b.append_value(std::str::from_utf8(t).unwrap_or_default()),
                        _ => b.append_null(),
                    }
                }
                Arc::new(b.finish())
            } else {
                let mut b = BinaryBuilder::with_capacity(rows, rows * 8);
                for f in fields {
                    match f {
                        F::Text(t) => b.append_value(t),
                        _ => b.append_null(),
                    }
                }
                Arc::new(b.finish())
            }
        }
        Some(F::Integer(_)) => {
            let mut b = Int64Builder::with_capacity(rows);
            for f in fields {
                b.append_option(match *f {
                    F::Integer(i) => Some(i),
                    _ => None,
                });
            }
            Arc::new(b.finish())
        }
        Some(F::Number(_)) => {
            let mut b = Float64Builder::with_capacity(rows);
            for f in fields {
                b.append_option(match *f {
                    F::Number(x) => Some(x),
                    _ => None,
                });
            }
            Arc::new(b.finish())
        }
        Some(F::Logical(_)) => {
            let mut b = BooleanBuilder::with_capacity(rows);
            for f in fields {
                b.append_option(match *f {
                    F::Logical(x) => Some(x),
                    _ => None,
                });
            }
            Arc::new(b.finish())
        }
        Some(F::Date(_)) => {
            let mut b = Date32Builder::with_capacity(rows);
            for f in fields {
                b.append_option(match *f {
                    F::Date(d) => i32::try_from(d).ok(),
                    _ => None,
                });
            }
            Arc::new(b.finish())
        }
        Some(F::Null) => unreachable!("a value"),
    };
    let Some(t) = input else { return natural };
    if natural.data_type() == t {
        return natural;
    }
    let text_like = |t: &DataType| {
        matches!(
            t,
            DataType::Utf8
                | DataType::LargeUtf8
                | DataType::Utf8View
                | DataType::Binary
                | DataType::LargeBinary
                | DataType::BinaryView
        )
    };
    use DataType as D;
    let exact = match (natural.data_type(), t) {
        (
            D::Int64,
            D::Int8 | D::Int16 | D::Int32 | D::UInt8 | D::UInt16 | D::UInt32 | D::UInt64,
        ) => true,
        (D::Float64, D::Float16 | D::Float32) => true,
        (D::Date32, D::Date64) => true,
        (D::Utf8 | D::Binary, t) if text_like(t) => true,
        (n, D::Dictionary(_, v)) => n == v.as_ref() || (text_like(n) && text_like(v)),
        _ => false,
    };
    if exact {
        let options = arrow_cast::CastOptions {
            safe: false,
            format_options: FORMAT,
        };
        if let Ok(a) = arrow_cast::cast_with_options(&natural, t, &options) {
            return a;
        }
        return natural;
    }
    // Fixed-size binary was read as its bytes: back to it when every value
    // has the size.
    if let D::FixedSizeBinary(_) = t {
        let options = arrow_cast::CastOptions {
            safe: false,
            format_options: FORMAT,
        };
        let bytes = arrow_cast::cast_with_options(&natural, &D::Binary, &options);
        if let Ok(a) = bytes.and_then(|b| arrow_cast::cast_with_options(&b, t, &options)) {
            return a;
        }
        return natural;
    }
    // Every type the reader reads is cast back above or comes back as read
    // (a timestamp as its day): no text of a value is parsed again here.
    natural
}

/// The decimal of scale `scale` that reads as `f` ([`decimal_reading`]),
/// as `(m, k)`: its unscaled value is `m` * 10^`k` (`k` >= 0); `None` when
/// no decimal of that scale reads as it.
fn decimal_of(f: crate::rows::Field<'_>, scale: i8) -> Option<(i128, u32)> {
    use crate::rows::Field as F;
    let s = i32::from(scale);
    match f {
        F::Integer(i) => {
            let i = i128::from(i);
            if s >= 0 {
                Some((i, s as u32))
            } else {
                let p = 10i128.checked_pow((-s) as u32)?;
                (i % p == 0).then_some((i / p, 0))
            }
        }
        F::Number(x) if x.is_finite() => {
            // The decimal read was m * 10^e, |m| below 10^15, e from -22 to
            // 22 and at least -scale (its unscaled value whole): the m of
            // each e is x / 10^e rounded (exact, m being below 2^50), kept
            // when it reads back as x.
            (-22i32..=22).filter(|e| e + s >= 0).find_map(|e| {
                let ten = EXACT_TENS[e.unsigned_abs() as usize];
                let m = if e >= 0 { x / ten } else { x * ten }.round();
                if m.abs() >= 1e15 {
                    return None;
                }
                let m = m as i128;
                (decimal_double(m, e) == Some(x)).then_some((m, (e + s) as u32))
            })
        }
        _ => None,
    }
}

/// The values `fields` of a decimal column (type `t`) as the decimals they
/// were read from ([`decimal_of`]); `None` when `t` is no decimal type or a
/// value is no reading of one.
fn decimal_column(fields: &[crate::rows::Field<'_>], t: &DataType) -> Option<ArrayRef> {
    use arrow_array::types::{Decimal128Type, Decimal256Type, Decimal32Type, Decimal64Type};
    use arrow_array::PrimitiveArray;
    let scale = match t {
        DataType::Decimal32(_, s)
        | DataType::Decimal64(_, s)
        | DataType::Decimal128(_, s)
        | DataType::Decimal256(_, s) => *s,
        _ => return None,
    };
    // Each value as (m, k): unscaled m * 10^k.
    let parts = fields
        .iter()
        .map(|f| match f {
            crate::rows::Field::Null => Some(None),
            f => decimal_of(*f, scale).map(Some),
        })
        .collect::<Option<Vec<_>>>()?;
    let small = |conv: &dyn Fn(i128) -> Option<i128>| -> Option<Vec<Option<i128>>> {
        parts
            .iter()
            .map(|p| match p {
                None => Some(None),
                Some((m, k)) => 10i128
                    .checked_pow(*k)
                    .and_then(|p| m.checked_mul(p))
                    .and_then(conv)
                    .map(Some),
            })
            .collect()
    };
    let array: ArrayRef = match t {
        DataType::Decimal32(p, s) => {
            let v = small(&|x| i32::try_from(x).ok().map(i128::from))?;
            let v: PrimitiveArray<Decimal32Type> = v.iter().map(|x| x.map(|x| x as i32)).collect();
            Arc::new(v.with_precision_and_scale(*p, *s).ok()?)
        }
        DataType::Decimal64(p, s) => {
            let v = small(&|x| i64::try_from(x).ok().map(i128::from))?;
            let v: PrimitiveArray<Decimal64Type> = v.iter().map(|x| x.map(|x| x as i64)).collect();
            Arc::new(v.with_precision_and_scale(*p, *s).ok()?)
        }
        DataType::Decimal128(p, s) => {
            let v: PrimitiveArray<Decimal128Type> = small(&Some)?.into_iter().collect();
            Arc::new(v.with_precision_and_scale(*p, *s).ok()?)
        }
        DataType::Decimal256(p, s) => {
            let ten = I256::from_i128(10);
            let v = parts
                .iter()
                .map(|p| match p {
                    None => Some(None),
                    Some((m, k)) => ten
                        .checked_pow(*k)
                        .and_then(|p| I256::from_i128(*m).checked_mul(p))
                        .map(Some),
                })
                .collect::<Option<Vec<_>>>()?;
            let v: PrimitiveArray<Decimal256Type> = v.into_iter().collect();
            Arc::new(v.with_precision_and_scale(*p, *s).ok()?)
        }
        _ => return None,
    };
    Some(array)
}

impl Drop for ParquetSink {
    fn drop(&mut self) {
        if let Some(mut b) = self.background.take() {
            b.abandoned.store(true, std::sync::atomic::Ordering::SeqCst);
            let _ = b.join();
        }
    }
}

/// A `Write` of `n` bytes by a sink that stops at its first failure: the
/// failure's message is kept in `failed` (every later write returns it).
fn latch(failed: &mut Option<String>, r: Result<(), Error>, n: usize) -> io::Result<usize> {
    r.map(|()| n).map_err(|e| {
        let m = e.to_string();
        *failed = Some(m.clone());
        io::Error::other(m)
    })
}

impl Write for ParquetSink {
    fn write(&mut self, buf: &[u8]) -> io::Result<usize> {
        if let Some(m) = &self.failed {
            return Err(io::Error::other(m.clone()));
        }
        let fed = self.feed_records(buf);
        latch(&mut self.failed, fed, buf.len())
    }
    fn flush(&mut self) -> io::Result<()> {
        Ok(())
    }
}

impl OutputColumns {
    /// The columns of `score`: the score columns typed, the kept columns of
    /// a Parquet `input` with their input types.
    pub fn scores(engine: &Engine, input: Option<&Schema>) -> OutputColumns {
        OutputColumns {
            input_types: input_types(input),
            values: ValueColumns::of(engine),
        }
    }

    /// The columns of `explain` for a run with `cfg` (see
    /// [`ValueColumns::explain`]): its id, episode and label columns with
    /// the types of a Parquet `input`'s, then the explanation's columns.
    pub fn explain(engine: &Engine, cfg: &ScoreConfig, input: Option<&Schema>) -> OutputColumns {
        let input_types = input_types(input);
        let kept = [&cfg.id, &cfg.episode]
            .into_iter()
            .flatten()
            .chain(&cfg.keep)
            .map(|n| (n.clone(), input_types.get(n).cloned()))
            .collect();
        OutputColumns {
            values: ValueColumns::explain(engine, kept),
            input_types,
        }
    }
}

fn input_types(input: Option<&Schema>) -> HashMap<String, DataType> {
    input.map_or_else(HashMap::new, |schema| {
        schema
            .fields()
            .iter()
            .map(|f| (f.name().clone(), f.data_type().clone()))
            .collect()
    })
}

/// The columns of a Parquet input (named `names`) that a run reads (diagnoses, age, id,
/// episode, date, primary flag, present-on-admission indicator, and
/// `extra`), by position; `None` when one of them cannot be resolved, so
/// that the run sees every column and reports the problem with its usual
/// message.
pub fn read_columns(names: &[String], cfg: &ScoreConfig, extra: &[String]) -> Option<Vec<usize>> {
    let header = crate::pipeline::Header {
        names: names.to_vec(),
    };
    let mut cols = header.columns(&cfg.dx, "diagnosis").ok()?;
    if let Some(poa) = &cfg.poa {
        // Names or globs, like the diagnosis columns (wide layout).
        cols.extend(
            header
                .columns(std::slice::from_ref(poa), "present-on-admission")
                .ok()?,
        );
    }
    let singles = [&cfg.age, &cfg.id, &cfg.episode, &cfg.date, &cfg.primary];
    for name in singles.into_iter().flatten().chain(&cfg.keep).chain(extra) {
        cols.push(header.column(name, "input").ok()?);
    }
    cols.sort_unstable();
    cols.dedup();
    Some(cols)
}

/// Refuses a run whose score columns would repeat a column of the Parquet
/// input that a wide output copies (the pipeline, reading only some
/// columns, does not see the others).
pub fn check_copied_names(input: &Schema, engine: &Engine) -> Result<(), Error> {
    let names: Vec<&str> = input.fields().iter().map(|f| f.name().as_str()).collect();
    crate::pipeline::check_collisions(&names, engine)
}

/// A Parquet input's rows, typed, for the history reader
/// ([`crate::rows::RowSource`]): record batches decoded from the file and
/// read in place, without any text in between. Text, binary and dictionary
/// columns give their bytes; integers (unsigned 64-bit ones up to
/// `i64::MAX`), floating-point numbers and booleans their values; decimals
/// a whole number or a number (see [`decimal_reading`]; one with more than
/// 15 significant digits is an error naming its row); dates and timestamps
/// their day (a timestamp with a time zone on its date in that zone); a
/// column of type `Null` is missing throughout. A column of any other type
/// (times of day, durations, lists, structs, ...) that the run reads is
/// refused, naming it and its type; the columns it does not read
/// ([`ParquetRows::reading_only`]) may be of any type.
pub struct ParquetRows {
    source: Source,
    batches: ParquetRecordBatchReader,
    names: Vec<String>,
    /// The columns read (all of the file's, or the projection's).
    schema: SchemaRef,
    /// The columns the run reads values of (`None`: all); the others are
    /// carried in the record batch only, for a sink to copy.
    used: Option<Vec<bool>>,
    /// Rows of the file (from its footer).
    pub total_rows: u64,
    /// The input as named in messages.
    name: String,
    /// The row (from 1) the next batch starts at.
    next_row: u64,
}

impl ParquetRows {
    /// The rows of `source`; `columns` (indices of the file's top-level
    /// columns) keeps only those, in file order. `name` names the input in
    /// messages (`row 4 of NAME: ...`).
    pub fn from_source(
        source: Source,
        columns: Option<&[usize]>,
        name: &str,
    ) -> Result<ParquetRows, Error> {
        let builder = source.builder()?;
        let total_rows = builder.metadata().file_metadata().num_rows().max(0) as u64;
        let mut builder = builder.with_batch_size(BATCH_ROWS);
        if let Some(cols) = columns {
            let mask = ProjectionMask::roots(builder.parquet_schema(), cols.iter().copied());
            builder = builder.with_projection(mask);
        }
        let fields: Vec<Field> = builder
            .schema()
            .fields()
            .iter()
            .enumerate()
            .filter(|(k, _)| columns.is_none_or(|c| c.contains(k)))
            .map(|(_, f)| f.as_ref().clone())
            .collect();
        let names = fields.iter().map(|f| f.name().clone()).collect();
        let schema = Arc::new(Schema::new(fields));
        let batches = source.build(builder)?;
        Ok(ParquetRows {
            source,
            batches,
            names,
            schema,
            used: None,
            total_rows,
            name: name.to_string(),
            next_row: 1,
        })
    }

    /// Reads values of the columns `used` only (positions among the columns
    /// read); the others stay in the record batches, untouched, for a sink
    /// that copies them.
    pub fn reading_only(mut self, used: &[usize]) -> ParquetRows {
        let mut flags = vec![false; self.names.len()];
        for &c in used {
            if let Some(f) = flags.get_mut(c) {
                *f = true;
            }
        }
        self.used = Some(flags);
        self
    }

    /// The columns read, with their types.
    pub fn schema(&self) -> SchemaRef {
        self.schema.clone()
    }
}

impl crate::rows::RowSource<'static> for ParquetRows {
    fn header(&self) -> crate::pipeline::Header {
        crate::pipeline::Header {
            names: self.names.clone(),
        }
    }

    fn next_batch(&mut self) -> Result<Option<Box<dyn crate::rows::Batch>>, Error> {
        let Some(batch) = self.source.next_batch(&mut self.batches)? else {
            return Ok(None);
        };
        // The decoder's arrays of a damaged file may upset their reading
        // too: the whole step is guarded.
        let (names, used, first) = (&self.names, self.used.as_deref(), self.next_row);
        let typed = guarded(|| ArrowBatch::new(&batch, names, used, first))
            .unwrap_or_else(|m| Err(self.source.damaged(&m)))?;
        self.next_row += batch.num_rows() as u64;
        Ok(Some(Box::new(typed)))
    }

    fn naming(&self) -> crate::rows::RowNaming {
        crate::rows::RowNaming {
            first: 1,
            of: Some(self.name.clone()),
        }
    }
}

/// What a run over a Parquet input writes, typed (see [`score_plain`]).
pub enum TypedOutput<'o> {
    /// Delimited text with `delimiter` (the writer of a text output, plain
    /// or gzip): the input's values formatted as the text reader of a CSV
    /// extract would hold them (text as it is, other types in their ISO or
    /// shortest round-trip form, nulls empty), then the scores.
    Text {
        out: &'o mut dyn Write,
        delimiter: u8,
    },
    /// Parquet: the input's own arrays copied (wide) or the id column's
    /// values taken from them (long), then the score columns built from the
    /// scores' values.
    Parquet(&'o mut ParquetSink),
}

/// How a scored batch is written, decided once per run (the workers build
/// their batch's output).
#[derive(Clone, Copy)]
enum Render {
    Text(u8),
    Parquet,
}

/// A batch's output, built by a worker.
enum Rendered {
    Text(Vec<u8>),
    Batch(RecordBatch),
}

/// The Arrow fields and arrays of the score columns of `rows` rows whose
/// values are `values` (`engine.columns().len()` per row): whole-number
/// scores `Int64`, scores with decimals `Float64` (the value as written
/// with its decimals), bands text, condition flags `Int8`; a missing value
/// is null.
pub fn score_arrays(
    engine: &Engine,
    values: &[Value],
    rows: usize,
) -> Result<Vec<(Field, ArrayRef)>, Error> {
    ValueColumns::of(engine).arrays(values, rows)
}

/// `columns` (fields and arrays of `rows` rows) then the score columns, as
/// one record batch.
fn with_scores(
    engine: &Engine,
    mut fields: Vec<Field>,
    mut arrays: Vec<ArrayRef>,
    values: &[Value],
    rows: usize,
) -> Result<RecordBatch, Error> {
    for (f, a) in score_arrays(engine, values, rows)? {
        fields.push(f);
        arrays.push(a);
    }
    RecordBatch::try_new_with_options(
        Arc::new(Schema::new(fields)),
        arrays,
        &RecordBatchOptions::new().with_row_count(Some(rows)),
    )
    .map_err(|e| Error::data(None, format!("internal error: {e}")))
}

/// The header line of a text output: `names`, then the score columns.
fn text_header(engine: &Engine, names: &[String], delimiter: u8) -> Vec<u8> {
    let mut out = Vec::new();
    for (k, n) in names.iter().enumerate() {
        if k > 0 {
            out.push(delimiter);
        }
        write_field(n.as_bytes(), delimiter, &mut out);
    }
    for (k, c) in engine.columns().iter().enumerate() {
        if k > 0 || !names.is_empty() {
            out.push(delimiter);
        }
        write_field(c.name.as_bytes(), delimiter, &mut out);
    }
    out.push(b'\n');
    out
}

/// Text columns of a record batch, for formatting its rows.
fn text_columns<'a>(batch: &'a RecordBatch) -> Result<Vec<TextColumn<'a>>, Error> {
    batch
        .columns()
        .iter()
        .zip(batch.schema_ref().fields())
        .map(|(a, f)| TextColumn::new(a.as_ref(), f.name()))
        .collect()
}

/// The rows of a scored batch as delimited text: its columns, then the
/// values.
fn render_text(
    engine: &Engine,
    batch: &RecordBatch,
    values: &[Value],
    rows: usize,
    delimiter: u8,
) -> Result<Vec<u8>, Error> {
    let cols = text_columns(batch)?;
    let w = engine.columns().len();
    let mut out = Vec::with_capacity(rows * (cols.len() * 8 + w * 4));
    let mut scratch = String::new();
    for row in 0..rows {
        for (k, c) in cols.iter().enumerate() {
            if k > 0 {
                out.push(delimiter);
            }
            c.write(row, delimiter, &mut scratch, &mut out);
        }
        let at = out.len();
        engine.write_values(&values[row * w..(row + 1) * w], delimiter, &mut out);
        if cols.is_empty() && out.len() > at {
            // No column before the first score.
            out.remove(at);
        }
        out.push(b'\n');
    }
    Ok(out)
}

/// Scores a Parquet input without history (see [`crate::pipeline::plain`])
/// and writes the result typed: no text is made of the input to be read
/// again, and none of the scores to be parsed. Wide: every row in input
/// order with every input column, batches scored on every core and written
/// in order; long: one row per id, in order of first appearance, the id
/// taken from the input's own arrays. Messages name `row N of NAME`.
pub fn score_plain(
    engine: &Engine,
    cfg: &ScoreConfig,
    source: Source,
    name: &str,
    output: TypedOutput<'_>,
    progress: &mut dyn FnMut(crate::pipeline::Progress),
) -> Result<crate::pipeline::Summary, Error> {
    let all = source.schema()?;
    let names: Vec<String> = all.fields().iter().map(|f| f.name().clone()).collect();
    match cfg.layout {
        Layout::Wide => {
            let used = read_columns(&names, cfg, &[]);
            let mut rows = ParquetRows::from_source(source, None, name)?;
            if let Some(u) = &used {
                rows = rows.reading_only(u);
            }
            score_wide_typed(engine, cfg, rows, output, progress)
        }
        Layout::Long => {
            let used = read_columns(&names, cfg, &[]);
            let rows = ParquetRows::from_source(source, used.as_deref(), name)?;
            score_long_typed(engine, cfg, rows, output, progress)
        }
    }
}

fn score_wide_typed(
    engine: &Engine,
    cfg: &ScoreConfig,
    rows: ParquetRows,
    output: TypedOutput<'_>,
    progress: &mut dyn FnMut(crate::pipeline::Progress),
) -> Result<crate::pipeline::Summary, Error> {
    use crate::pipeline::plain;
    use crate::rows::RowSource;
    let naming = rows.naming();
    let schema = rows.schema();
    let source = rows.source.clone();
    let damaged = |m: &str| source.damaged(m);
    let render = match &output {
        TypedOutput::Text { delimiter, .. } => Render::Text(*delimiter),
        TypedOutput::Parquet(_) => Render::Parquet,
    };
    let write_err = |e| Error::io("cannot write output", e);
    let mut output = output;
    let mut summary: Option<crate::pipeline::Summary> = None;
    let mut started = false;
    let start = |output: &mut TypedOutput<'_>, p: &plain::TypedPlan| -> Result<(), Error> {
        if let TypedOutput::Text { out, delimiter } = output {
            out.write_all(&text_header(engine, &p.0.header.names, *delimiter))
                .map_err(write_err)?;
        }
        Ok(())
    };
    let plan = crate::pipeline::run_typed_batches(
        cfg,
        Box::new(rows),
        |header| plain::plan(engine, cfg, header),
        |p, batch, first| {
            let mut values = Vec::new();
            let (s, err) = plain::score_wide(engine, cfg, p, batch, first, &mut values);
            let w = engine.columns().len().max(1);
            let n = values.len() / w;
            let rendered = guarded(|| match batch.record_batch() {
                None => Err(Error::data(
                    None,
                    "internal error: a batch without its arrays",
                )),
                Some(b) => {
                    let b = b.slice(0, n);
                    match render {
                        Render::Text(d) => {
                            render_text(engine, &b, &values, n, d).map(Rendered::Text)
                        }
                        Render::Parquet => {
                            let fields = b
                                .schema()
                                .fields()
                                .iter()
                                .map(|f| f.as_ref().clone())
                                .collect();
                            with_scores(engine, fields, b.columns().to_vec(), &values, n)
                                .map(Rendered::Batch)
                        }
                    }
                }
            })
            // The decoder's arrays of a damaged file may upset formatting.
            .unwrap_or_else(|m| Err(damaged(&m)));
            (rendered, s, err)
        },
        |p, (rendered, s, err), prog| {
            if !started {
                start(&mut output, p)?;
                started = true;
            }
            match (rendered?, &mut output) {
                (Rendered::Text(t), TypedOutput::Text { out, .. }) => {
                    out.write_all(&t).map_err(write_err)?
                }
                (Rendered::Batch(b), TypedOutput::Parquet(sink)) => sink.write_batch(b)?,
                _ => return Err(Error::data(None, "internal error: output of another kind")),
            }
            match &mut summary {
                None => summary = Some(s),
                Some(all) => all.merge(s),
            }
            progress(prog);
            err.map_or(Ok(()), Err)
        },
    )
    .map_err(|e| naming.name(e))?;
    let mut summary = summary.unwrap_or_default();
    summary.dx_columns = plan.dx_names();
    if !started && matches!(output, TypedOutput::Text { .. }) {
        start(&mut output, &plan)?;
    }
    match &mut output {
        TypedOutput::Text { out, .. } => out.flush().map_err(write_err)?,
        TypedOutput::Parquet(sink) => {
            if !started {
                // No rows: the file still has its columns.
                let fields = schema.fields().iter().map(|f| f.as_ref().clone()).collect();
                let arrays = schema
                    .fields()
                    .iter()
                    .map(|f| arrow_array::new_empty_array(f.data_type()))
                    .collect();
                sink.write_batch(with_scores(engine, fields, arrays, &[], 0)?)?;
            }
        }
    }
    Ok(summary)
}

fn score_long_typed(
    engine: &Engine,
    cfg: &ScoreConfig,
    mut rows: ParquetRows,
    mut output: TypedOutput<'_>,
    progress: &mut dyn FnMut(crate::pipeline::Progress),
) -> Result<crate::pipeline::Summary, Error> {
    use crate::pipeline::plain;
    use crate::rows::RowSource;
    let naming = rows.naming();
    let write_err = |e| Error::io("cannot write output", e);
    let plan = plain::plan(engine, cfg, rows.header())?;
    let idc = plan.id().unwrap_or(0);
    let id_field = rows.schema().field(idc).clone();
    let mut scorer = plain::LongScorer::new(engine, &plan);
    // The id column of every batch, and the row each batch starts at.
    let mut ids: Vec<ArrayRef> = Vec::new();
    let mut starts: Vec<u64> = Vec::new();
    let mut first = 1u64;
    while let Some(batch) = rows.next_batch().map_err(|e| naming.name(e))? {
        let Some(b) = batch.record_batch() else {
            return Err(Error::data(
                None,
                "internal error: a batch without its arrays",
            ));
        };
        ids.push(b.column(idc).clone());
        starts.push(first);
        scorer
            .add(cfg, &plan, batch.as_ref(), first)
            .map_err(|e| naming.name(e))?;
        first += batch.len() as u64;
        progress(crate::pipeline::Progress {
            bytes_read: 0,
            rows: first - 1,
        });
    }
    let id_refs: Vec<&dyn Array> = ids.iter().map(|a| a.as_ref()).collect();
    let id_text = match &output {
        TypedOutput::Text { .. } => id_refs
            .iter()
            .map(|a| TextColumn::new(*a, id_field.name()))
            .collect::<Result<Vec<_>, Error>>()?,
        TypedOutput::Parquet(_) => Vec::new(),
    };
    if let TypedOutput::Text { out, delimiter } = &mut output {
        let names = [id_field.name().clone()];
        out.write_all(&text_header(engine, &names, *delimiter))
            .map_err(write_err)?;
    }
    const CHUNK: usize = 8192;
    let mut at: Vec<(usize, usize)> = Vec::with_capacity(CHUNK);
    let mut values: Vec<Value> = Vec::with_capacity(CHUNK * engine.columns().len());
    let mut text = Vec::new();
    let mut scratch = String::new();
    let mut flush = |at: &mut Vec<(usize, usize)>,
                     values: &mut Vec<Value>,
                     output: &mut TypedOutput<'_>|
     -> Result<(), Error> {
        match output {
            TypedOutput::Text { out, delimiter } => {
                text.clear();
                let w = engine.columns().len();
                for (u, &(b, r)) in at.iter().enumerate() {
                    id_text[b].write(r, *delimiter, &mut scratch, &mut text);
                    engine.write_values(&values[u * w..(u + 1) * w], *delimiter, &mut text);
                    text.push(b'\n');
                }
                out.write_all(&text).map_err(write_err)?;
            }
            TypedOutput::Parquet(sink) => {
                let id = if id_refs.is_empty() {
                    arrow_array::new_empty_array(id_field.data_type())
                } else {
                    arrow_select::interleave::interleave(&id_refs, at)
                        .map_err(|e| Error::data(None, format!("internal error: {e}")))?
                };
                let field = Field::new(id_field.name(), id.data_type().clone(), true);
                sink.write_batch(with_scores(
                    engine,
                    vec![field],
                    vec![id],
                    values,
                    at.len(),
                )?)?;
            }
        }
        at.clear();
        values.clear();
        Ok(())
    };
    let summary = scorer.finish(|row, v| {
        let b = starts.partition_point(|&s| s <= row) - 1;
        at.push((b, (row - starts[b]) as usize));
        values.extend_from_slice(v);
        if at.len() >= CHUNK {
            flush(&mut at, &mut values, &mut output)?;
        }
        Ok(())
    })?;
    // An output without units still gets its columns.
    if !at.is_empty() || summary.units == 0 {
        flush(&mut at, &mut values, &mut output)?;
    }
    if let TypedOutput::Text { out, .. } = &mut output {
        out.flush().map_err(write_err)?;
    }
    Ok(summary)
}

/// A text output of a history run over a Parquet input's typed rows in the
/// wide layout: the run writes the score columns only (there is no row
/// text to copy), and this writer puts each input row in front of its
/// scores, formatted from the input's own record batches (read again from
/// the file, every column) as [`TypedOutput::Text`] formats them. The
/// scores' lines are only cut at their line ends, never parsed.
/// [`JoinedText::finish`] checks that every input row was written.
pub struct JoinedText<'o> {
    out: &'o mut dyn Write,
    source: Source,
    reader: ParquetRecordBatchReader,
    names: Vec<String>,
    delimiter: u8,
    pending: Vec<u8>,
    header: bool,
    batch: Option<RecordBatch>,
    row: usize,
    failed: Option<String>,
}

impl<'o> JoinedText<'o> {
    /// Joins the rows of `source` to the score lines written to it, into
    /// `out`.
    pub fn new(out: &'o mut dyn Write, source: Source, delimiter: u8) -> Result<Self, Error> {
        let builder = source.builder()?.with_batch_size(BATCH_ROWS);
        let names = builder
            .schema()
            .fields()
            .iter()
            .map(|f| f.name().clone())
            .collect();
        let reader = source.build(builder)?;
        Ok(JoinedText {
            out,
            source,
            reader,
            names,
            delimiter,
            pending: Vec::new(),
            header: false,
            batch: None,
            row: 0,
            failed: None,
        })
    }

    /// Writes the complete lines of `pending`.
    fn lines(&mut self) -> Result<(), Error> {
        let Some(end) = memchr::memrchr(b'\n', &self.pending) else {
            return Ok(());
        };
        let pending = std::mem::take(&mut self.pending);
        let (whole, rest) = pending.split_at(end + 1);
        let d = self.delimiter;
        let mut out = Vec::with_capacity(whole.len() * 3);
        let mut lines = whole.split_inclusive(|&b| b == b'\n').peekable();
        if !self.header {
            if let Some(line) = lines.next() {
                for (k, n) in self.names.iter().enumerate() {
                    if k > 0 {
                        out.push(d);
                    }
                    write_field(n.as_bytes(), d, &mut out);
                }
                if !self.names.is_empty() {
                    out.push(d);
                }
                out.extend_from_slice(line);
                self.header = true;
            }
        }
        let mut scratch = String::new();
        while lines.peek().is_some() {
            // The rows of the current batch, formatted.
            while self.batch.as_ref().is_none_or(|b| self.row >= b.num_rows()) {
                match self.source.next_batch(&mut self.reader)? {
                    Some(b) => {
                        self.batch = Some(b);
                        self.row = 0;
                    }
                    None => {
                        return Err(Error::data(
                            None,
                            format!(
                                "internal error: the output has more rows than {}",
                                self.source.name()
                            ),
                        ))
                    }
                }
            }
            let batch = self.batch.as_ref().expect("a batch");
            let source = &self.source;
            let cols =
                guarded(|| text_columns(batch)).unwrap_or_else(|m| Err(source.damaged(&m)))?;
            while self.row < batch.num_rows() {
                let Some(line) = lines.next() else { break };
                for (k, c) in cols.iter().enumerate() {
                    if k > 0 {
                        out.push(d);
                    }
                    c.write(self.row, d, &mut scratch, &mut out);
                }
                if !cols.is_empty() {
                    out.push(d);
                }
                out.extend_from_slice(line);
                self.row += 1;
            }
        }
        self.pending = rest.to_vec();
        self.out
            .write_all(&out)
            .map_err(|e| Error::io("cannot write output", e))
    }

    /// Checks that every row of the input was written, and flushes.
    pub fn finish(mut self) -> Result<(), Error> {
        if let Some(m) = self.failed.take() {
            return Err(Error::data(None, m));
        }
        let fewer = || {
            Error::data(
                None,
                format!(
                    "internal error: the output has fewer rows than {}",
                    self.source.name()
                ),
            )
        };
        if !self.pending.is_empty() || self.batch.as_ref().is_some_and(|b| self.row < b.num_rows())
        {
            return Err(fewer());
        }
        while let Some(b) = self.source.next_batch(&mut self.reader)? {
            if b.num_rows() > 0 {
                return Err(fewer());
            }
        }
        self.out
            .flush()
            .map_err(|e| Error::io("cannot write output", e))
    }
}

impl Write for JoinedText<'_> {
    fn write(&mut self, buf: &[u8]) -> io::Result<usize> {
        if let Some(m) = &self.failed {
            return Err(io::Error::other(m.clone()));
        }
        self.pending.extend_from_slice(buf);
        let cut = self.lines();
        latch(&mut self.failed, cut, buf.len())
    }
    fn flush(&mut self) -> io::Result<()> {
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::io::arrow_rows::{decimal_reading, strip_zeros, ArrowColumn};
    use crate::lists::Catalogue;
    use crate::score::{IndexSpec, ScoreOptions};
    use arrow_array::{Int64Array, StringArray};
    use parquet::arrow::ArrowWriter;

    /// The reading of column `a` (type `t`) at each row, or the error.
    fn readings(a: ArrayRef) -> Result<Vec<crate::rows::Field<'static>>, Error> {
        let c = ArrowColumn::new(&a, "d", 1)?;
        Ok((0..a.len())
            .map(|i| match c.field(i) {
                crate::rows::Field::Text(_) => panic!("text"),
                crate::rows::Field::Null => crate::rows::Field::Null,
                crate::rows::Field::Integer(v) => crate::rows::Field::Integer(v),
                crate::rows::Field::Number(v) => crate::rows::Field::Number(v),
                crate::rows::Field::Logical(v) => crate::rows::Field::Logical(v),
                crate::rows::Field::Date(v) => crate::rows::Field::Date(v),
            })
            .collect())
    }

    #[test]
    fn decimals_read_as_whole_numbers_or_numbers_and_come_back_exactly() {
        use crate::rows::Field as F;
        use arrow_array::{Decimal128Array, Decimal256Array, Decimal32Array, Decimal64Array};
        let d128 = |raw: Vec<Option<i128>>, p: u8, s: i8| -> ArrayRef {
            Arc::new(
                Decimal128Array::from(raw)
                    .with_precision_and_scale(p, s)
                    .unwrap(),
            )
        };
        let cases: Vec<(ArrayRef, Vec<F<'static>>)> = vec![
            // Scale 1: numbers (80.0 too).
            (
                d128(vec![Some(805), Some(800), None, Some(-1)], 5, 1),
                vec![F::Number(80.5), F::Number(80.0), F::Null, F::Number(-0.1)],
            ),
            // Scale 0: whole numbers; beyond i64, numbers.
            (
                d128(vec![Some(7), Some(12 * 10i128.pow(20))], 38, 0),
                vec![F::Integer(7), F::Number(1.2e21)],
            ),
            // Scale -2: whole hundreds.
            (
                d128(vec![Some(123), Some(-5)], 10, -2),
                vec![F::Integer(12_300), F::Integer(-500)],
            ),
            // Fifteen digits, some of them after the point.
            (
                d128(vec![Some(999_999_999_999_999)], 15, 5),
                vec![F::Number(9_999_999_999.999_99)],
            ),
            (
                Arc::new(
                    Decimal32Array::from(vec![Some(12_345)])
                        .with_precision_and_scale(9, 2)
                        .unwrap(),
                ),
                vec![F::Number(123.45)],
            ),
            (
                Arc::new(
                    Decimal64Array::from(vec![Some(-42)])
                        .with_precision_and_scale(18, 0)
                        .unwrap(),
                ),
                vec![F::Integer(-42)],
            ),
            (
                Arc::new(
                    // 25 * 10^38, beyond an i128: 0.25 at scale 40.
                    Decimal256Array::from(vec![Some(
                        I256::from_i128(25 * 10i128.pow(36))
                            .checked_mul(I256::from_i128(100))
                            .unwrap(),
                    )])
                    .with_precision_and_scale(76, 40)
                    .unwrap(),
                ),
                vec![F::Number(0.25)],
            ),
        ];
        for (a, expected) in cases {
            let got = readings(a.clone()).unwrap();
            assert_eq!(got, expected, "{}", a.data_type());
            // The Parquet output's kept column gives the same decimals back.
            let back = decimal_column(&got, a.data_type()).unwrap();
            assert_eq!(back.as_ref(), a.as_ref());
        }
    }

    #[test]
    fn decimals_of_fifteen_digits_read_back_to_themselves_and_stay_apart() {
        use crate::rows::Field as F;
        // Neighbouring decimals of 15 digits, at several scales: each reads
        // to its own number, and back to itself.
        for (m, scale) in [
            (999_999_999_999_999i128, 3i8),
            (100_000_000_000_001, 14),
            (123_456_789_012_345, 20),
            (900_719_925_474_099, 0),
            (1, 22),
        ] {
            let mut seen = Vec::new();
            for raw in [m - 1, m, m + 1] {
                let (sm, t) = strip_zeros(raw);
                let f = decimal_reading(sm, t, scale).unwrap();
                let F::Number(x) = f else {
                    assert!(scale <= 0, "{raw} scale {scale}: {f:?}");
                    continue;
                };
                assert!(!seen.contains(&x.to_bits()), "{raw} scale {scale}");
                seen.push(x.to_bits());
                let (bm, k) = decimal_of(f, scale).unwrap();
                assert_eq!(bm * 10i128.pow(k), raw, "scale {scale}");
            }
        }
        // Sixteen digits, or an exponent beyond 10^22: no reading.
        assert_eq!(decimal_reading(1_234_567_890_123_456, 0, 2), None);
        assert_eq!(decimal_reading(1, 0, 23), None);
        let a: ArrayRef = Arc::new(
            arrow_array::Decimal128Array::from(vec![Some(5), Some(1_234_567_890_123_456)])
                .with_precision_and_scale(20, 2)
                .unwrap(),
        );
        let e = readings(a).unwrap_err().to_string();
        assert!(
            e.contains("line 2") && e.contains("12345678901234.56"),
            "{e}"
        );
    }

    #[test]
    fn unsigned_whole_numbers_beyond_i64_and_unreadable_types_are_refused() {
        use crate::rows::Field as F;
        let a: ArrayRef = Arc::new(arrow_array::UInt64Array::from(vec![
            Some(i64::MAX as u64),
            None,
        ]));
        assert_eq!(readings(a).unwrap(), [F::Integer(i64::MAX), F::Null]);
        let a: ArrayRef = Arc::new(arrow_array::UInt64Array::from(vec![
            Some(1),
            Some(i64::MAX as u64 + 1),
        ]));
        let e = readings(a).unwrap_err().to_string();
        assert!(
            e.contains("line 2") && e.contains("9223372036854775808"),
            "{e}"
        );
        let a: ArrayRef = Arc::new(arrow_array::NullArray::new(2));
        assert_eq!(readings(a).unwrap(), [F::Null, F::Null]);
        let a: ArrayRef = Arc::new(arrow_array::Time32SecondArray::from(vec![Some(60)]));
        let e = readings(a).unwrap_err().to_string();
        assert!(e.contains("column 'd' holds times of day"), "{e}");
        // A dictionary's value that cannot be read is named by the first
        // row holding it; one no row holds stops nothing.
        let values: ArrayRef = Arc::new(arrow_array::UInt64Array::from(vec![1, u64::MAX, 5]));
        let dictionary = |keys: Vec<Option<i32>>| -> ArrayRef {
            let keys = arrow_array::Int32Array::from(keys);
            Arc::new(arrow_array::DictionaryArray::try_new(keys, values.clone()).unwrap())
        };
        let e = readings(dictionary(vec![Some(0), None, Some(1), Some(1)]))
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("line 3") && e.contains("18446744073709551615"),
            "{e}"
        );
        assert_eq!(
            readings(dictionary(vec![Some(2), None, Some(0)])).unwrap(),
            [F::Integer(5), F::Null, F::Integer(1)]
        );
    }

    #[test]
    fn kept_values_handed_over_typed_are_built_with_the_input_type() {
        use crate::rows::Field as F;
        use arrow_array::types::{Date32Type, Decimal128Type, Float64Type, Int32Type, Int64Type};
        // Whole numbers: 2^53 + 1, which a double would make 2^53.
        let ints = [F::Integer(9_007_199_254_740_993), F::Null, F::Integer(-7)];
        let a = key_column(&ints, &Some(DataType::Int64));
        let a = a.as_primitive::<Int64Type>();
        assert_eq!(a.value(0), 9_007_199_254_740_993);
        assert!(a.is_null(1));
        assert_eq!(a.value(2), -7);
        // A narrower integer column keeps its type.
        let a = key_column(&ints[1..], &Some(DataType::Int32));
        assert_eq!(a.as_primitive::<Int32Type>().value(1), -7);
        // Numbers bit for bit: -0.0 stays -0.0.
        let a = key_column(&[F::Number(-0.0), F::Number(0.5)], &Some(DataType::Float64));
        let a = a.as_primitive::<Float64Type>();
        assert_eq!(a.value(0).to_bits(), (-0.0f64).to_bits());
        assert_eq!(a.value(1), 0.5);
        // Days: 2020-01-01 is day 18,262.
        let a = key_column(&[F::Date(18_262)], &Some(DataType::Date32));
        assert_eq!(a.as_primitive::<Date32Type>().value(0), 18_262);
        // No value at all: nulls of the input's type, or text without one.
        let a = key_column(&[F::Null, F::Null], &Some(DataType::Float64));
        assert_eq!((a.data_type(), a.null_count()), (&DataType::Float64, 2));
        let a = key_column(&[F::Null], &None);
        assert_eq!(a.data_type(), &DataType::Utf8);
        // Decimals, read as the numbers they are (1.50 as 1.5), are the
        // decimals again (150 hundredths).
        let dec = DataType::Decimal128(10, 2);
        let a = key_column(
            &[F::Number(1.5), F::Null, F::Number(-0.25)],
            &Some(dec.clone()),
        );
        assert_eq!(a.data_type(), &dec);
        let d = a.as_primitive::<Decimal128Type>();
        assert_eq!((d.value(0), d.is_null(1), d.value(2)), (150, true, -25));
        // Text is never parsed into a decimal: it stays text.
        let a = key_column(&[F::Text(b"1.50"), F::Text(b"x")], &Some(dec));
        assert_eq!(a.data_type(), &DataType::Utf8);
    }

    /// A wide score of a Parquet input whose row groups (37 rows) do not
    /// line up with the output's batches (50 rows): every row comes out
    /// once, in order, with the input's own columns.
    /// Nanoseconds of row `i`'s INT96 stamp in [`write_with_int96`].
    fn stamp_nanos(i: usize) -> i64 {
        // Julian day 2,440,588 is 1970-01-01.
        i as i64 * 86_400_000_000_000 + i as i64
    }

    /// `batch` (an Int64 id and a text dx1) and a third column of INT96
    /// stamps, in row groups of `group` rows, written with the low-level
    /// writer (the Arrow writer does not write INT96).
    fn write_with_int96(path: &std::path::Path, batch: &RecordBatch, group: usize) {
        use parquet::data_type::{ByteArray, ByteArrayType, Int64Type, Int96, Int96Type};
        use parquet::file::writer::SerializedFileWriter;
        let schema = parquet::schema::parser::parse_message_type(
            "message schema { REQUIRED INT64 id; REQUIRED BYTE_ARRAY dx1 (UTF8); REQUIRED INT96 stamp; }",
        )
        .unwrap();
        let mut w = SerializedFileWriter::new(
            File::create(path).unwrap(),
            Arc::new(schema),
            Default::default(),
        )
        .unwrap();
        let ids = batch
            .column(0)
            .as_primitive::<arrow_array::types::Int64Type>();
        let dx = batch.column(1).as_string::<i32>();
        let n = batch.num_rows();
        for from in (0..n).step_by(group) {
            let rows = from..(from + group).min(n);
            let mut g = w.next_row_group().unwrap();
            let mut c = g.next_column().unwrap().unwrap();
            let v: Vec<i64> = rows.clone().map(|i| ids.value(i)).collect();
            c.typed::<Int64Type>().write_batch(&v, None, None).unwrap();
            c.close().unwrap();
            let mut c = g.next_column().unwrap().unwrap();
            let v: Vec<ByteArray> = rows.clone().map(|i| ByteArray::from(dx.value(i))).collect();
            c.typed::<ByteArrayType>()
                .write_batch(&v, None, None)
                .unwrap();
            c.close().unwrap();
            let mut c = g.next_column().unwrap().unwrap();
            let v: Vec<Int96> = rows
                .map(|i| {
                    // Nanoseconds of the day (low 8 bytes), Julian day (high 4).
                    let mut x = Int96::new();
                    let nanos = i as u64;
                    x.set_data(nanos as u32, (nanos >> 32) as u32, 2_440_588 + i as u32);
                    x
                })
                .collect();
            c.typed::<Int96Type>().write_batch(&v, None, None).unwrap();
            c.close().unwrap();
            g.close().unwrap();
        }
        w.close().unwrap();
    }

    #[test]
    fn copied_columns_line_up_across_uneven_batches() {
        // An input whose columns are copied as encoded, and one holding a
        // column type that is written otherwise than read (INT96 stamps
        // read as timestamps), whose columns are decoded and encoded again.
        for copied_as_encoded in [true, false] {
            copied_columns_line_up(copied_as_encoded);
        }
    }

    fn copied_columns_line_up(copied_as_encoded: bool) {
        let dir = std::env::temp_dir().join(format!(
            "morbus-pq-unit-{}-{copied_as_encoded}",
            std::process::id()
        ));
        std::fs::create_dir_all(&dir).unwrap();
        let input = dir.join("in.parquet");
        let n = 370;
        let ids = Int64Array::from_iter_values(0..n as i64);
        let codes = ["I21.9", "C78.0", "", "F00.1", "E11.2", "bad"];
        let dx = StringArray::from_iter_values((0..n).map(|i| codes[i % codes.len()]));
        let batch = RecordBatch::try_from_iter([
            ("id", Arc::new(ids) as ArrayRef),
            ("dx1", Arc::new(dx) as ArrayRef),
        ])
        .unwrap();
        if copied_as_encoded {
            let props = WriterProperties::builder()
                .set_max_row_group_row_count(Some(37))
                .build();
            let mut w =
                ArrowWriter::try_new(File::create(&input).unwrap(), batch.schema(), Some(props))
                    .unwrap();
            w.write(&batch).unwrap();
            w.close().unwrap();
        } else {
            write_with_int96(&input, &batch, 37);
        }

        let specs = IndexSpec::parse_many("charlson").unwrap();
        let engine = Engine::new(&Catalogue::builtin(), &specs, ScoreOptions::default()).unwrap();
        let cfg = ScoreConfig {
            dx: vec!["dx1".into()],
            threads: 2,
            ..ScoreConfig::default()
        };
        let source = Source::File(input.clone());
        let out = dir.join("out.parquet");
        let columns = OutputColumns::scores(&engine, Some(&source.schema().unwrap()));
        let mut sink = ParquetSink::new(
            Box::new(File::create(&out).unwrap()),
            b',',
            columns,
            Some(source.clone()),
        )
        .with_group_rows(50);
        // The score columns only, as value records, as a history run over
        // typed rows writes them: the sink puts the input's columns in
        // front.
        use crate::rows::RowSource;
        use std::io::Write as _;
        let mut rows = ParquetRows::from_source(source.clone(), Some(&[1]), "in").unwrap();
        let plan = crate::pipeline::plain::plan(&engine, &cfg, rows.header()).unwrap();
        let names: Vec<&str> = engine.columns().iter().map(|c| c.name.as_str()).collect();
        let mut head = Vec::new();
        value_records::start(&mut head);
        value_records::put_text(&mut head, names.join(",").as_bytes());
        // In pieces, as a writer may get them.
        for piece in head.chunks(5) {
            sink.write_all(piece).unwrap();
        }
        let mut summary = crate::pipeline::Summary::default();
        let mut first = 1;
        while let Some(b) = rows.next_batch().unwrap() {
            let mut values = Vec::new();
            let (s, err) = crate::pipeline::plain::score_wide(
                &engine,
                &cfg,
                &plan,
                b.as_ref(),
                first,
                &mut values,
            );
            assert!(err.is_none());
            summary.merge(s);
            for v in values.chunks(names.len()) {
                let mut record = Vec::new();
                value_records::put_text(&mut record, b"");
                value_records::put_values(&mut record, v);
                sink.write_all(&record).unwrap();
            }
            first += b.len() as u64;
        }
        sink.finish().unwrap();
        assert_eq!(summary.rows_read, n as u64);
        assert_eq!(
            summary.invalid_codes,
            (n / codes.len()) as u64 + u64::from(n % codes.len() > 5)
        );

        let reader = ParquetRecordBatchReaderBuilder::try_new(File::open(&out).unwrap()).unwrap();
        let got: Vec<RecordBatch> = reader.build().unwrap().map(Result::unwrap).collect();
        let got = arrow_select::concat::concat_batches(&got[0].schema(), &got).unwrap();
        assert_eq!(got.num_rows(), n);
        assert_eq!(got.column(0).as_ref(), batch.column(0).as_ref());
        assert_eq!(got.column(1).as_ref(), batch.column(1).as_ref());
        let groups = |p: &std::path::Path| -> Vec<(i64, Vec<i64>)> {
            let b = ParquetRecordBatchReaderBuilder::try_new(File::open(p).unwrap()).unwrap();
            let m = b.metadata();
            m.row_groups()
                .iter()
                .map(|g| {
                    (
                        g.num_rows(),
                        g.columns().iter().map(|c| c.compressed_size()).collect(),
                    )
                })
                .collect()
        };
        let (theirs, ours) = (groups(&input), groups(&out));
        let copied = if copied_as_encoded { 2 } else { 3 };
        if copied_as_encoded {
            // The input's row groups, its column chunks as they were.
            assert_eq!(ours.len(), theirs.len());
            for (o, t) in ours.iter().zip(&theirs) {
                assert_eq!(o.0, t.0);
                assert_eq!(o.1[..copied], t.1[..]);
            }
        } else {
            // Encoded again: row groups of the output's own size.
            assert_eq!(ours.iter().map(|g| g.0).collect::<Vec<_>>(), [n as i64]);
            let stamps = got
                .column(2)
                .as_primitive::<arrow_array::types::TimestampNanosecondType>();
            assert!((0..n).all(|i| stamps.value(i) == stamp_nanos(i)));
        }
        // Each row's score follows its own code: the same code, the same score.
        let scores = got
            .column(copied)
            .as_primitive::<arrow_array::types::Int64Type>();
        for i in codes.len()..n {
            assert_eq!(scores.value(i), scores.value(i % codes.len()), "row {i}");
        }
        std::fs::remove_dir_all(&dir).unwrap();
    }
}
