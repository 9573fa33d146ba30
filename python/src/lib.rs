//! `morbus._native`: the Python extension of morbus.
//!
//! A thin layer: it resolves options with the library's own parsers, reads
//! the diagnosis, age and id columns of a frame through the Arrow C stream
//! interface, scores them with [`morbus::columnar::Scorer`] without the GIL,
//! and hands the score columns back as an Arrow C stream. There is no scoring
//! logic here; the frame handling (pandas, polars, pyarrow) is in
//! `morbus/__init__.py`.

use std::ffi::CStr;
use std::path::PathBuf;
use std::sync::Arc;

use arrow_array::builder::{Float64Builder, Int64Builder, Int8Builder, StringBuilder};
use arrow_array::cast::AsArray;
use arrow_array::ffi_stream::{FFI_ArrowArrayStream, RecordBatchStreamReader};
use arrow_array::types::*;
use arrow_array::{
    Array, ArrayRef, Int64Array, RecordBatch, RecordBatchIterator, RecordBatchReader,
};
use arrow_buffer::NullBuffer;
use arrow_schema::{ArrowError, DataType, Field, Schema, SchemaRef};
use pyo3::exceptions::{PyKeyError, PyTypeError, PyValueError};
use pyo3::prelude::*;
use pyo3::types::{PyCapsule, PyDict, PyList};

use morbus::columnar::{self, Age, Rows, Scorer};
use morbus::lists::{Catalogue, CodeList, SCALE};
use morbus::pipeline::{Edition, Header, Layout, ScoreConfig, Summary};
use morbus::provenance::Provenance;
use morbus::score::{ColumnKind, Engine, IndexSpec, ScoreOptions, Value, DEFAULT_INDICES};
use morbus::Error;

mod history;

const STREAM: &CStr = c"arrow_array_stream";

/// The Python exception for a library error: `ValueError`, with the
/// library's message (the command line's, with `(strict=True)` for
/// `(--strict)`).
fn value_error(e: Error) -> PyErr {
    let msg = match e {
        Error::Strict {
            line: None,
            message,
        } => format!("{message} (strict=True)"),
        other => other.to_string(),
    };
    PyValueError::new_err(msg)
}

/// A set of code lists: the built-ins, plus the lists of a directory.
///
/// Made by `morbus.load_lists(path)`; pass it as `lists=` to `morbus.score`
/// and `morbus.lists`.
#[pyclass(module = "morbus._native", name = "Lists", frozen)]
struct PyLists {
    catalogue: Catalogue,
    notes: Vec<String>,
    path: Option<PathBuf>,
}

#[pymethods]
impl PyLists {
    /// Notes from loading: the lists' warnings and which built-ins were
    /// replaced (the command line prints these on standard error).
    #[getter]
    fn notes(&self) -> Vec<String> {
        self.notes.clone()
    }

    /// The directory the lists were loaded from (None: built-ins only).
    #[getter]
    fn path(&self) -> Option<PathBuf> {
        self.path.clone()
    }

    /// Names of the lists, in catalogue order.
    #[getter]
    fn names(&self) -> Vec<String> {
        self.catalogue
            .names()
            .into_iter()
            .map(String::from)
            .collect()
    }

    fn __repr__(&self) -> String {
        match &self.path {
            Some(p) => format!(
                "<morbus.Lists {} from built-ins and {}>",
                self.catalogue.names().join(", "),
                p.display()
            ),
            None => format!(
                "<morbus.Lists {} (built-in)>",
                self.catalogue.names().join(", ")
            ),
        }
    }
}

/// Loads the lists of a directory (`*.tsv`) on top of the built-ins.
#[pyfunction]
fn load_lists(path: PathBuf) -> PyResult<PyLists> {
    let (catalogue, notes) = Catalogue::builtin_and_dir(&path).map_err(value_error)?;
    Ok(PyLists {
        catalogue,
        notes,
        path: Some(path),
    })
}

/// The built-in lists.
#[pyfunction]
fn builtin_lists() -> PyLists {
    PyLists {
        catalogue: Catalogue::builtin(),
        notes: Vec::new(),
        path: None,
    }
}

fn list_info<'py>(py: Python<'py>, l: &CodeList) -> PyResult<Bound<'py, PyDict>> {
    let d = PyDict::new(py);
    d.set_item("name", &l.name)?;
    d.set_item("version", &l.version)?;
    d.set_item("title", &l.title)?;
    d.set_item("checksum", &l.checksum)?;
    d.set_item("source", &l.source)?;
    d.set_item("origin", l.origin.to_string())?;
    d.set_item("editions", &l.editions)?;
    d.set_item("default_weighting", &l.default_weighting)?;
    let weightings = PyList::empty(py);
    for w in &l.weightings {
        let wd = PyDict::new(py);
        wd.set_item("name", &w.name)?;
        wd.set_item("label", &w.label)?;
        wd.set_item("source", &w.source)?;
        wd.set_item("decimals", w.decimals)?;
        let bands: Vec<&str> = w.bands.iter().map(|b| b.name.as_str()).collect();
        wd.set_item("bands", bands)?;
        weightings.append(wd)?;
    }
    d.set_item("weightings", weightings)?;
    let conditions = PyList::empty(py);
    for c in &l.conditions {
        let cd = PyDict::new(py);
        cd.set_item("key", &c.key)?;
        cd.set_item("label", &c.label)?;
        cd.set_item("source", &c.source)?;
        conditions.append(cd)?;
    }
    d.set_item("conditions", conditions)?;
    d.set_item("code_entries", l.code_entries())?;
    d.set_item("has_age_points", !l.age_points.is_empty())?;
    Ok(d)
}

/// One dict per list of a catalogue.
#[pyfunction]
fn list_table<'py>(py: Python<'py>, lists: &PyLists) -> PyResult<Bound<'py, PyList>> {
    let out = PyList::empty(py);
    for l in lists.catalogue.lists() {
        out.append(list_info(py, l)?)?;
    }
    Ok(out)
}

/// The Arrow C stream of a score result, for `pyarrow.table(...)`.
#[pyclass(module = "morbus._native", name = "ArrowStream")]
struct ArrowStream {
    /// `None` once consumed.
    batches: Option<(Vec<RecordBatch>, SchemaRef)>,
}

impl ArrowStream {
    fn new(batches: Vec<RecordBatch>, schema: SchemaRef) -> ArrowStream {
        ArrowStream {
            batches: Some((batches, schema)),
        }
    }
}

#[pymethods]
impl ArrowStream {
    #[pyo3(signature = (requested_schema=None))]
    fn __arrow_c_stream__<'py>(
        &mut self,
        py: Python<'py>,
        requested_schema: Option<Bound<'py, PyAny>>,
    ) -> PyResult<Bound<'py, PyCapsule>> {
        // The schema is fixed; a requested schema is a hint that may be
        // ignored (Arrow PyCapsule interface).
        let _ = requested_schema;
        let (batches, schema) = self
            .batches
            .take()
            .ok_or_else(|| PyValueError::new_err("this Arrow stream was already consumed"))?;
        let reader: Box<dyn RecordBatchReader + Send> = Box::new(RecordBatchIterator::new(
            batches.into_iter().map(Ok),
            schema,
        ));
        PyCapsule::new_with_value(py, FFI_ArrowArrayStream::new(reader), STREAM)
    }
}

/// Imports every batch of an object exposing `__arrow_c_stream__`.
fn import_stream(obj: &Bound<'_, PyAny>) -> PyResult<Vec<RecordBatch>> {
    let capsule = obj.call_method0("__arrow_c_stream__")?;
    let capsule = capsule
        .cast::<PyCapsule>()
        .map_err(|_| PyTypeError::new_err("__arrow_c_stream__ did not return a PyCapsule"))?;
    let ptr = capsule.pointer_checked(Some(STREAM))?;
    // SAFETY: the capsule holds an `ArrowArrayStream` (checked by name); its
    // content is moved out and the original marked released, as the Arrow
    // PyCapsule interface prescribes.
    let reader = unsafe { RecordBatchStreamReader::from_raw(ptr.as_ptr().cast()) }
        .map_err(|e| PyValueError::new_err(format!("cannot read the Arrow stream: {e}")))?;
    reader
        .collect::<Result<Vec<_>, ArrowError>>()
        .map_err(|e| PyValueError::new_err(format!("cannot read the Arrow stream: {e}")))
}

/// A text column of a batch.
enum Text<'a> {
    /// String or binary with 32-bit offsets (read straight from the buffers).
    Offsets32 {
        offsets: &'a [i32],
        values: &'a [u8],
        nulls: Option<&'a NullBuffer>,
    },
    /// Large string or large binary: 64-bit offsets.
    Offsets64 {
        offsets: &'a [i64],
        values: &'a [u8],
        nulls: Option<&'a NullBuffer>,
    },
    View(&'a arrow_array::StringViewArray),
    BinaryView(&'a arrow_array::BinaryViewArray),
    Dict {
        array: &'a dyn Array,
        keys: Vec<usize>,
        values: Box<Text<'a>>,
    },
    /// Every value null.
    Null,
}

impl<'a> Text<'a> {
    /// A text view of an array, or `None` when its type holds no text.
    fn new(array: &'a dyn Array) -> Option<Text<'a>> {
        if array.null_count() == array.len() {
            return Some(Text::Null);
        }
        fn o32<'a, T: arrow_array::types::ByteArrayType<Offset = i32>>(
            a: &'a arrow_array::GenericByteArray<T>,
        ) -> Text<'a> {
            Text::Offsets32 {
                offsets: a.value_offsets(),
                values: a.value_data(),
                nulls: a.nulls(),
            }
        }
        fn o64<'a, T: arrow_array::types::ByteArrayType<Offset = i64>>(
            a: &'a arrow_array::GenericByteArray<T>,
        ) -> Text<'a> {
            Text::Offsets64 {
                offsets: a.value_offsets(),
                values: a.value_data(),
                nulls: a.nulls(),
            }
        }
        Some(match array.data_type() {
            DataType::Utf8 => o32(array.as_string::<i32>()),
            DataType::LargeUtf8 => o64(array.as_string::<i64>()),
            DataType::Binary => o32(array.as_binary::<i32>()),
            DataType::LargeBinary => o64(array.as_binary::<i64>()),
            DataType::Utf8View => Text::View(array.as_string_view()),
            DataType::BinaryView => Text::BinaryView(array.as_binary_view()),
            DataType::Dictionary(_, _) => {
                let d = array.as_any_dictionary();
                if d.values().is_empty() {
                    return Some(Text::Null);
                }
                let values = Text::new(d.values().as_ref())?;
                Text::Dict {
                    array,
                    keys: d.normalized_keys(),
                    values: Box::new(values),
                }
            }
            DataType::Null => Text::Null,
            _ => return None,
        })
    }

    #[inline]
    fn get(&self, i: usize) -> &[u8] {
        match self {
            Text::Offsets32 {
                offsets,
                values,
                nulls,
            } => {
                if nulls.is_some_and(|n| n.is_null(i)) {
                    return b"";
                }
                &values[offsets[i] as usize..offsets[i + 1] as usize]
            }
            Text::Offsets64 {
                offsets,
                values,
                nulls,
            } => {
                if nulls.is_some_and(|n| n.is_null(i)) {
                    return b"";
                }
                &values[offsets[i] as usize..offsets[i + 1] as usize]
            }
            Text::View(a) => {
                if a.is_null(i) {
                    b""
                } else {
                    a.value(i).as_bytes()
                }
            }
            Text::BinaryView(a) => {
                if a.is_null(i) {
                    b""
                } else {
                    a.value(i)
                }
            }
            Text::Dict {
                array,
                keys,
                values,
            } => {
                if array.is_null(i) {
                    b""
                } else {
                    values.get(keys[i])
                }
            }
            Text::Null => b"",
        }
    }

    #[inline]
    fn is_null(&self, i: usize) -> bool {
        match self {
            Text::Offsets32 { nulls, .. } | Text::Offsets64 { nulls, .. } => {
                nulls.is_some_and(|n| n.is_null(i))
            }
            Text::View(a) => a.is_null(i),
            Text::BinaryView(a) => a.is_null(i),
            Text::Dict {
                array,
                keys,
                values,
            } => array.is_null(i) || values.is_null(keys[i]),
            Text::Null => true,
        }
    }
}

/// Whole numbers of an integer column (`None`: null; no value for other
/// types).
fn ints(array: &dyn Array) -> Option<Vec<Option<i128>>> {
    macro_rules! prim {
        ($t:ty) => {
            array
                .as_primitive::<$t>()
                .iter()
                .map(|v| v.map(|x| x as i128))
                .collect()
        };
    }
    Some(match array.data_type() {
        DataType::Int8 => prim!(Int8Type),
        DataType::Int16 => prim!(Int16Type),
        DataType::Int32 => prim!(Int32Type),
        DataType::Int64 => prim!(Int64Type),
        DataType::UInt8 => prim!(UInt8Type),
        DataType::UInt16 => prim!(UInt16Type),
        DataType::UInt32 => prim!(UInt32Type),
        DataType::UInt64 => prim!(UInt64Type),
        _ => return None,
    })
}

/// Numbers of a numeric column as `f64` (`None`: null).
fn numbers(array: &dyn Array) -> Option<Vec<Option<f64>>> {
    match array.data_type() {
        DataType::Float32 => Some(
            array
                .as_primitive::<Float32Type>()
                .iter()
                .map(|v| v.map(f64::from))
                .collect(),
        ),
        DataType::Float64 => Some(array.as_primitive::<Float64Type>().iter().collect()),
        _ => ints(array).map(|v| v.into_iter().map(|x| x.map(|x| x as f64)).collect()),
    }
}

/// Whole numbers of an integer column as id keys (`None`: null).
fn integer_keys(array: &dyn Array) -> Option<Vec<Option<[u8; 8]>>> {
    ints(array).map(|v| {
        v.into_iter()
            .map(|x| x.map(|x| (x as i64).to_le_bytes()))
            .collect()
    })
}

enum AgeCol<'a> {
    None,
    Text(Text<'a>),
    Number(Vec<Option<f64>>),
}

enum IdCol<'a> {
    None,
    Text(Text<'a>),
    Int(Vec<Option<[u8; 8]>>),
}

/// One batch of the columns a run uses, as [`Rows`].
struct Batch<'a> {
    len: usize,
    dx: Vec<Text<'a>>,
    age: AgeCol<'a>,
    id: IdCol<'a>,
}

impl Rows for Batch<'_> {
    fn len(&self) -> usize {
        self.len
    }
    #[inline]
    fn dx(&self, k: usize, row: usize) -> &[u8] {
        self.dx[k].get(row)
    }
    fn age(&self, row: usize) -> Age<'_> {
        match &self.age {
            AgeCol::None => Age::Missing,
            AgeCol::Text(t) => {
                if t.is_null(row) {
                    Age::Missing
                } else {
                    Age::Text(t.get(row))
                }
            }
            AgeCol::Number(v) => v[row].map_or(Age::Missing, Age::Number),
        }
    }
    fn id(&self, row: usize) -> Option<&[u8]> {
        match &self.id {
            IdCol::None => None,
            IdCol::Text(t) => (!t.is_null(row)).then(|| t.get(row)),
            IdCol::Int(v) => v[row].as_ref().map(|b| b.as_slice()),
        }
    }
}

/// Rows `start..start + len` of a batch.
struct Part<'b, 'a> {
    batch: &'b Batch<'a>,
    start: usize,
    len: usize,
}

impl Rows for Part<'_, '_> {
    fn len(&self) -> usize {
        self.len
    }
    #[inline]
    fn dx(&self, k: usize, row: usize) -> &[u8] {
        self.batch.dx(k, self.start + row)
    }
    fn age(&self, row: usize) -> Age<'_> {
        self.batch.age(self.start + row)
    }
    fn id(&self, row: usize) -> Option<&[u8]> {
        self.batch.id(self.start + row)
    }
}

/// Threads for a wide run: `threads` when positive, else one per core (as
/// the command line's `--threads`).
fn thread_count(threads: usize) -> usize {
    if threads > 0 {
        return threads;
    }
    std::thread::available_parallelism().map_or(1, |n| n.get())
}

/// Rows from which the wide layout is scored on several threads.
const PARALLEL_ROWS: usize = 50_000;

/// Scores a wide frame in `threads` parts of consecutive rows, each on its
/// own thread; the parts' columns come back in row order, their summaries
/// merged, and the error of the first failing part (the first in row
/// order, as a single pass would meet it).
fn score_wide_parallel(
    engine: &Engine,
    cfg: &ScoreConfig,
    header: &Header,
    plan: &columnar::Plan,
    views: &[Batch<'_>],
    threads: usize,
) -> Result<(Vec<RecordBatch>, Summary), Error> {
    let total: usize = views.iter().map(|v| v.len).sum();
    let per = total.div_ceil(threads.max(1)).max(1);
    // (first row, parts of batches) of each task
    let mut tasks: Vec<(usize, Vec<Part<'_, '_>>)> = Vec::new();
    let mut row = 0usize;
    for v in views {
        let mut start = 0;
        while start < v.len {
            if tasks.last().is_none_or(|t| row >= t.0 + per) {
                tasks.push((row, Vec::new()));
            }
            let task = tasks.last_mut().expect("a task");
            let room = task.0 + per - row;
            let len = room.min(v.len - start);
            task.1.push(Part {
                batch: v,
                start,
                len,
            });
            start += len;
            row += len;
        }
    }
    let results: Vec<Result<(RecordBatch, Summary), Error>> = std::thread::scope(|s| {
        let handles: Vec<_> = tasks
            .iter()
            .map(|(first, parts)| {
                s.spawn(move || {
                    let mut scorer =
                        Scorer::new(engine, cfg, header, plan).starting_at(*first as u64);
                    let rows: usize = parts.iter().map(|p| p.len).sum();
                    let mut out = Output::new(engine, rows);
                    for p in parts {
                        scorer.wide(p, |vals| out.push(engine, vals))?;
                    }
                    Ok((out.finish(engine), scorer.into_summary()))
                })
            })
            .collect();
        handles
            .into_iter()
            .map(|h| h.join().expect("a scoring thread panicked"))
            .collect()
    });
    let mut batches = Vec::new();
    let mut summary = Summary::default();
    for r in results {
        let (b, s) = r?;
        batches.push(b);
        summary.merge(s);
    }
    Ok((batches, summary))
}

fn type_name(t: &DataType) -> String {
    match t {
        DataType::Dictionary(_, v) => format!("dictionary of {v}"),
        other => other.to_string(),
    }
}

/// Views of the used columns of a batch; columns are `dx..., [age], [id]`.
fn batch_view<'a>(
    batch: &'a RecordBatch,
    names: &[String],
    n_dx: usize,
    has_age: bool,
    has_id: bool,
) -> PyResult<Batch<'a>> {
    let cols = batch.columns();
    let mut dx = Vec::with_capacity(n_dx);
    for (k, name) in names.iter().enumerate().take(n_dx) {
        let a = cols[k].as_ref();
        let t = Text::new(a).ok_or_else(|| {
            PyValueError::new_err(format!(
                "diagnosis column '{name}' holds {} values, not text; ICD-10 codes are text \
                 (convert the column to strings first if its values really are codes)",
                type_name(a.data_type())
            ))
        })?;
        dx.push(t);
    }
    let mut next = n_dx;
    let age = if has_age {
        let a = cols[next].as_ref();
        next += 1;
        if let Some(v) = numbers(a) {
            AgeCol::Number(v)
        } else if let Some(t) = Text::new(a) {
            AgeCol::Text(t)
        } else {
            return Err(PyValueError::new_err(format!(
                "age column '{}' holds {} values; ages must be numbers or text",
                names[n_dx],
                type_name(a.data_type())
            )));
        }
    } else {
        AgeCol::None
    };
    let id = if has_id {
        let a = cols[next].as_ref();
        if let Some(v) = integer_keys(a) {
            IdCol::Int(v)
        } else if let Some(t) = Text::new(a) {
            IdCol::Text(t)
        } else {
            return Err(PyValueError::new_err(format!(
                "id column '{}' holds {} values; ids must be text or whole numbers",
                names[next],
                type_name(a.data_type())
            )));
        }
    } else {
        IdCol::None
    };
    Ok(Batch {
        len: batch.num_rows(),
        dx,
        age,
        id,
    })
}

/// Builders of the output columns, one per engine column.
enum Out {
    Int(Int64Builder),
    Float(Float64Builder),
    Band(StringBuilder),
    Flag(Int8Builder),
}

struct Output {
    cols: Vec<Out>,
}

impl Output {
    fn new(engine: &Engine, rows: usize) -> Output {
        let cols = engine
            .columns()
            .iter()
            .map(|c| match c.kind {
                ColumnKind::Score { spec } | ColumnKind::ScoreWithAge { spec } => {
                    if engine.decimals(spec) == 0 {
                        Out::Int(Int64Builder::with_capacity(rows))
                    } else {
                        Out::Float(Float64Builder::with_capacity(rows))
                    }
                }
                ColumnKind::Band { .. } => Out::Band(StringBuilder::with_capacity(rows, rows * 8)),
                ColumnKind::Flag { .. } => Out::Flag(Int8Builder::with_capacity(rows)),
            })
            .collect();
        Output { cols }
    }

    #[inline]
    fn push(&mut self, engine: &Engine, values: &[Value]) {
        for (b, v) in self.cols.iter_mut().zip(values) {
            match (b, *v) {
                (Out::Int(b), Value::Score { scaled, .. }) => b.append_value(scaled / SCALE),
                (Out::Float(b), Value::Score { scaled, .. }) => {
                    b.append_value(scaled as f64 / SCALE as f64)
                }
                (Out::Int(b), _) => b.append_null(),
                (Out::Float(b), _) => b.append_null(),
                (Out::Band(b), Value::Band { spec, band }) => {
                    b.append_value(engine.band_name(spec, band))
                }
                (Out::Band(b), _) => b.append_null(),
                (Out::Flag(b), Value::Flag(f)) => b.append_value(f as i8),
                (Out::Flag(b), _) => b.append_null(),
            }
        }
    }

    fn finish(self, engine: &Engine) -> RecordBatch {
        let mut fields = Vec::new();
        let mut arrays: Vec<ArrayRef> = Vec::new();
        for (c, b) in engine.columns().iter().zip(self.cols) {
            let nullable = matches!(
                c.kind,
                ColumnKind::ScoreWithAge { .. } | ColumnKind::Band { .. }
            );
            let a: ArrayRef = match b {
                Out::Int(mut b) => Arc::new(b.finish()),
                Out::Float(mut b) => Arc::new(b.finish()),
                Out::Band(mut b) => Arc::new(b.finish()),
                Out::Flag(mut b) => Arc::new(b.finish()),
            };
            fields.push(Field::new(&c.name, a.data_type().clone(), nullable));
            arrays.push(a);
        }
        let schema = Arc::new(Schema::new(fields));
        let rows = arrays.first().map_or(0, |a| a.len());
        RecordBatch::try_new_with_options(
            schema,
            arrays,
            &arrow_array::RecordBatchOptions::new().with_row_count(Some(rows)),
        )
        .expect("score columns of equal length")
    }
}

/// Whether a column-resolution error is about a column that is not there
/// (raised as `KeyError`) rather than a bad request (`ValueError`).
fn missing_column(cfg: &ScoreConfig, header: &Header) -> bool {
    let absent = |name: &str| !header.names.iter().any(|n| n == name);
    let dx_missing = cfg
        .dx
        .iter()
        .flat_map(|s| s.split(','))
        .map(str::trim)
        .filter(|i| !i.is_empty())
        .any(|item| {
            if item.contains(['*', '?', '[']) {
                glob::Pattern::new(item)
                    .map(|p| !header.names.iter().any(|n| p.matches(n)))
                    .unwrap_or(false)
            } else {
                absent(item)
            }
        });
    dx_missing
        || cfg.age.as_deref().is_some_and(absent)
        || (cfg.layout == Layout::Long && cfg.id.as_deref().is_some_and(absent))
}

/// Scores the columns of a frame. Called by `morbus.score`, which see.
///
/// `names` are the frame's column names; `fetch(indices)` returns an object
/// exposing `__arrow_c_stream__` with those columns, in that order. Returns
/// `(scores, first_rows, provenance, report)`: the score columns as an Arrow
/// stream, (long layout) the row where each unit first appears as an Arrow
/// stream, the run's provenance as JSON (that of `morbus score --provenance`)
/// and its summary line.
#[pyfunction]
#[pyo3(signature = (names, fetch, *, dx, layout, id, age, index, flags, hierarchy, lists, dx_sep, strict, threads, edition="any"))]
#[allow(clippy::too_many_arguments)]
fn score<'py>(
    py: Python<'py>,
    names: Vec<String>,
    fetch: Bound<'py, PyAny>,
    dx: Vec<String>,
    layout: &str,
    id: Option<String>,
    age: Option<String>,
    index: Option<Vec<String>>,
    flags: bool,
    hierarchy: bool,
    lists: Option<PyRef<'py, PyLists>>,
    dx_sep: Option<String>,
    strict: bool,
    threads: usize,
    edition: &str,
) -> PyResult<(ArrowStream, Option<ArrowStream>, String, String)> {
    let builtin;
    let lists: &PyLists = match &lists {
        Some(l) => l,
        None => {
            builtin = builtin_lists();
            &builtin
        }
    };
    let spec_text = match &index {
        None => DEFAULT_INDICES.to_string(),
        Some(v) if v.is_empty() => DEFAULT_INDICES.to_string(),
        Some(v) => v.join(","),
    };
    let specs = IndexSpec::parse_many(&spec_text).map_err(|e| value_error(e.into()))?;
    let options = ScoreOptions {
        hierarchy,
        flags,
        age: age.is_some(),
    };
    let engine =
        Engine::new(&lists.catalogue, &specs, options).map_err(|e| value_error(e.into()))?;
    let layout = match layout {
        "wide" => Layout::Wide,
        "long" => Layout::Long,
        other => {
            return Err(PyValueError::new_err(format!(
                "layout must be 'wide' or 'long', not '{other}'"
            )))
        }
    };
    if layout == Layout::Long && id.is_none() {
        return Err(PyValueError::new_err("layout='long' needs id=COLUMN"));
    }
    let dx_sep = match dx_sep.as_deref() {
        None => None,
        Some(s) if s.len() == 1 && s.is_ascii() && s != "\"" && s != "\n" && s != "\r" => {
            Some(s.as_bytes()[0])
        }
        Some(s) => {
            return Err(PyValueError::new_err(format!(
                "dx_sep must be one ASCII character, not '{s}'"
            )))
        }
    };
    let cfg = ScoreConfig {
        dx,
        dx_sep,
        layout,
        id,
        age,
        strict,
        edition: parse_edition(edition)?,
        threads,
        ..ScoreConfig::default()
    };
    let header = Header { names };
    let plan = columnar::plan(&engine, &cfg, &header).map_err(|e| {
        if missing_column(&cfg, &header) {
            PyKeyError::new_err(e.to_string())
        } else {
            value_error(e)
        }
    })?;

    let mut used: Vec<usize> = plan.dx.clone();
    used.extend(plan.age);
    used.extend(plan.id);
    let used_names: Vec<String> = used.iter().map(|&i| header.names[i].clone()).collect();
    let data = fetch.call1((used.clone(),))?;
    let batches = import_stream(&data)?;
    for b in &batches {
        if b.num_columns() != used.len() {
            return Err(PyValueError::new_err(format!(
                "expected {} columns from the frame, got {}",
                used.len(),
                b.num_columns()
            )));
        }
    }
    let views = batches
        .iter()
        .map(|b| {
            batch_view(
                b,
                &used_names,
                plan.dx.len(),
                plan.age.is_some(),
                plan.id.is_some(),
            )
        })
        .collect::<PyResult<Vec<_>>>()?;
    let total: usize = views.iter().map(|v| v.len).sum();

    let threads = thread_count(cfg.threads);
    let (result, first_rows, summary) = py
        .detach(|| {
            if layout == Layout::Wide && threads > 1 && total >= PARALLEL_ROWS {
                let (batches, summary) =
                    score_wide_parallel(&engine, &cfg, &header, &plan, &views, threads)?;
                return Ok((batches, Vec::new(), summary));
            }
            let mut scorer = Scorer::new(&engine, &cfg, &header, &plan);
            let mut out = Output::new(&engine, if layout == Layout::Wide { total } else { 0 });
            let mut first = Vec::new();
            for v in &views {
                match layout {
                    Layout::Wide => scorer.wide(v, |vals| out.push(&engine, vals))?,
                    Layout::Long => scorer.long(v)?,
                }
            }
            if layout == Layout::Long {
                scorer.finish_long(|row, vals| {
                    first.push(row as i64);
                    out.push(&engine, vals);
                });
            }
            Ok((vec![out.finish(&engine)], first, scorer.into_summary()))
        })
        .map_err(value_error)?;
    let schema = Output::new(&engine, 0).finish(&engine).schema();

    let first_rows = (layout == Layout::Long).then(|| {
        let a: ArrayRef = Arc::new(Int64Array::from(first_rows));
        let schema = Arc::new(Schema::new(vec![Field::new("row", DataType::Int64, false)]));
        let batch = RecordBatch::try_new(schema.clone(), vec![a]).expect("one column");
        ArrowStream::new(vec![batch], schema)
    });

    let prov = Provenance::new(&engine, &cfg, &summary).to_json();

    Ok((
        ArrowStream::new(result, schema),
        first_rows,
        prov,
        summary.report(),
    ))
}

/// Version of the morbus library this extension was built with.
#[pyfunction]
fn version() -> &'static str {
    morbus::VERSION
}

/// Whether this extension is a debug build (slow; for tests only).
#[pyfunction]
fn debug_build() -> bool {
    cfg!(debug_assertions)
}

/// `edition=`: `"who"`, `"cm"` or `"any"`.
pub(crate) fn parse_edition(text: &str) -> PyResult<Edition> {
    Edition::parse(text).ok_or_else(|| {
        PyValueError::new_err(format!(
            "edition must be 'who', 'cm' or 'any', not '{text}'"
        ))
    })
}

/// Whether each value is an ICD-10 code of the editions: `"known"`,
/// `"extended"` (the code is not in them but its category is), `"unknown"`
/// (well-shaped, but neither the code nor its category is in them),
/// `"invalid"` (not ICD-10-shaped) or `"empty"`, as `morbus score` counts
/// diagnosis values.
#[pyfunction]
#[pyo3(signature = (values, edition="any"))]
fn code_status(values: Vec<String>, edition: &str) -> PyResult<Vec<&'static str>> {
    let edition = parse_edition(edition)?;
    Ok(values
        .iter()
        .map(|v| match morbus::code::read_code(v.as_bytes()) {
            morbus::code::Reading::Empty => "empty",
            morbus::code::Reading::Invalid => "invalid",
            morbus::code::Reading::Valid(c) => morbus::editions::existence(&c, edition).name(),
        })
        .collect())
}

#[pymodule]
fn _native(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<PyLists>()?;
    m.add_class::<ArrowStream>()?;
    m.add_function(wrap_pyfunction!(load_lists, m)?)?;
    m.add_function(wrap_pyfunction!(builtin_lists, m)?)?;
    m.add_function(wrap_pyfunction!(list_table, m)?)?;
    m.add_function(wrap_pyfunction!(score, m)?)?;
    m.add_function(wrap_pyfunction!(version, m)?)?;
    m.add_function(wrap_pyfunction!(debug_build, m)?)?;
    m.add_function(wrap_pyfunction!(history::score_history, m)?)?;
    m.add_function(wrap_pyfunction!(history::explain, m)?)?;
    m.add_function(wrap_pyfunction!(code_status, m)?)?;
    Ok(())
}
