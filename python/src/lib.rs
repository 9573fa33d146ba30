//! `morbus._native`: the Python extension of morbus.
//!
//! A thin layer over [`morbus::frame`]: it hands the library the options of
//! a call ([`morbus::frame::Request`], with the command line's checks and
//! messages), reads the columns the run uses through the Arrow C stream
//! interface and shows them to the library as an
//! [`morbus::io::arrow_rows::ArrowFrame`] (the library's one reader of
//! Arrow arrays, that of Parquet inputs: text read in place, integers,
//! decimals, numbers, booleans, dates), runs
//! [`morbus::frame::score`] or [`morbus::frame::explain`] without the GIL,
//! and hands the typed results back as Arrow C streams. There is no scoring
//! or history logic here; the frame handling (pandas, polars, pyarrow) is in
//! `morbus/__init__.py` and `morbus/_history.py`.

use std::ffi::CStr;
use std::path::PathBuf;
use std::sync::Arc;

use arrow_array::ffi_stream::{FFI_ArrowArrayStream, RecordBatchStreamReader};
use arrow_array::{
    Array, ArrayRef, Date32Array, Float64Array, Int64Array, Int8Array, RecordBatch,
    RecordBatchIterator, RecordBatchReader, StringArray,
};
use arrow_schema::{ArrowError, DataType, Field, Schema, SchemaRef};
use pyo3::exceptions::{PyKeyError, PyTypeError, PyValueError};
use pyo3::prelude::*;
use pyo3::types::{PyCapsule, PyDict, PyList};

use morbus::frame::{self, Explained, Request, ScoreColumn};
use morbus::io::arrow_rows::ArrowFrame;
use morbus::lists::{Catalogue, CodeList};
use morbus::pipeline::{Edition, Header};
use morbus::provenance::Provenance;
use morbus::score::{ColumnKind, Engine};
use morbus::Error;

mod compare;

const STREAM: &CStr = c"arrow_array_stream";

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
    let (catalogue, notes) = Catalogue::builtin_and_dir(&path).map_err(python_error)?;
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

/// The options of a `score`, `explain` or `compare` call, as
/// `morbus/__init__.py` (`_options`) hands them over: one dict, the same
/// for every call.
#[derive(FromPyObject)]
#[pyo3(from_item_all)]
struct Options {
    dx: Vec<String>,
    layout: String,
    id: Option<String>,
    age: Option<String>,
    index: Option<Vec<String>>,
    flags: bool,
    hierarchy: bool,
    dx_sep: Option<String>,
    strict: bool,
    threads: usize,
    date: Option<String>,
    date_format: Option<String>,
    lookback: Option<String>,
    window: Option<String>,
    episode: Option<String>,
    exclude_primary: bool,
    primary: Option<String>,
    poa: Option<String>,
    poa_values: Vec<String>,
    max_unreadable_dates: Option<String>,
    edition: String,
    keep: Vec<String>,
    label: Option<String>,
}

impl Options {
    /// The library's request: its checks and messages are the command
    /// line's (turned into Python's option names by [`python_error`]).
    fn request(self) -> PyResult<Request> {
        if morbus::pipeline::poa_values_from(&self.poa_values).is_empty() {
            return Err(PyValueError::new_err(
                "poa_values is empty; name the values that count (e.g. 'Y,W,1,blank')",
            ));
        }
        Ok(Request {
            dx: self.dx,
            dx_sep: self.dx_sep,
            layout: self.layout,
            id: self.id,
            episode: self.episode,
            date: self.date,
            date_format: self.date_format,
            lookback: self.lookback,
            window: self.window,
            exclude_primary: self.exclude_primary,
            primary: self.primary,
            poa: self.poa,
            poa_values: self.poa_values,
            max_unreadable_dates: self.max_unreadable_dates,
            index: self.index.unwrap_or_default(),
            age: self.age,
            flags: self.flags,
            no_hierarchy: !self.hierarchy,
            strict: self.strict,
            threads: self.threads,
            edition: Some(self.edition),
            keep: self.keep,
            label: self.label,
        })
    }
}

/// The command line's option names as Python spells them, in the order
/// they are tried (longer phrases first).
const PYTHON_WORDS: &[(&str, &str)] = &[
    ("(--strict)", "(strict=True)"),
    (
        "--layout long needs --id COL",
        "layout='long' needs id=COLUMN",
    ),
    (
        "--layout is 'wide' or 'long'",
        "layout must be 'wide' or 'long'",
    ),
    (
        "--lookback needs --id (the patient column) and --date",
        "lookback= needs id= (the patient column) and date=",
    ),
    (
        "--date is used with --lookback DAYS",
        "date= is used with lookback=DAYS",
    ),
    (
        "--window is used with --lookback DAYS",
        "window= is used with lookback=DAYS",
    ),
    (
        "--exclude-primary in the long layout needs --primary COL",
        "exclude_primary=True in the long layout needs primary=COLUMN",
    ),
    ("--exclude-primary", "exclude_primary=True"),
    ("--primary is for", "primary= is for"),
    ("--episode is for", "episode= is for"),
    ("--keep is for", "keep= is for"),
    ("--label column", "label column"),
    ("named by both --poa and --dx", "named by both poa= and dx="),
    ("--poa '", "poa= '"),
    (" but --dx names", " but dx= names"),
    ("--dx-sep", "dx_sep"),
    ("--date-format", "date_format"),
    ("--max-unreadable-dates", "max_unreadable_dates"),
    ("--poa-values", "poa_values"),
    ("--lookback", "lookback"),
    ("--window", "window"),
    ("--edition", "edition"),
];

/// A library error as a Python exception: `KeyError` for a column that is
/// not in the frame, else `ValueError`; the command line's message with
/// Python's option names.
fn python_error(e: Error) -> PyErr {
    let mut m = match e {
        Error::Strict {
            line: None,
            message,
        } => format!("{message} (strict=True)"),
        other => other.to_string(),
    };
    for (cli, py) in PYTHON_WORDS {
        if m.contains(cli) {
            m = m.replace(cli, py);
        }
    }
    if m.contains(" not found; columns in the input: ")
        || m.contains(" matches no column; columns in the input: ")
    {
        PyKeyError::new_err(m)
    } else {
        PyValueError::new_err(m)
    }
}

/// Runs `f` over the lists of a call: `lists`, or the built-ins.
fn with_lists<R>(lists: Option<PyRef<'_, PyLists>>, f: impl FnOnce(&Catalogue) -> R) -> R {
    match lists {
        Some(l) => f(&l.catalogue),
        None => f(&Catalogue::builtin()),
    }
}

/// Fetches the used columns of the frame (`fetch(indices)`, an object
/// exposing `__arrow_c_stream__`) as one batch.
fn fetch_batch(fetch: &Bound<'_, PyAny>, used: &[usize]) -> PyResult<RecordBatch> {
    let data = fetch.call1((used.to_vec(),))?;
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
    match batches.len() {
        1 => Ok(batches.into_iter().next().expect("one batch")),
        _ => {
            let fields: Vec<Field> = (0..used.len())
                .map(|k| {
                    let t = batches
                        .first()
                        .map_or(DataType::Null, |b| b.column(k).data_type().clone());
                    Field::new(format!("c{k}"), t, true)
                })
                .collect();
            let schema = Arc::new(Schema::new(fields));
            let batches: Vec<RecordBatch> = batches
                .into_iter()
                .map(|b| RecordBatch::try_new(schema.clone(), b.columns().to_vec()))
                .collect::<Result<_, ArrowError>>()
                .map_err(|e| PyValueError::new_err(format!("cannot read the frame: {e}")))?;
            arrow_select::concat::concat_batches(&schema, &batches)
                .map_err(|e| PyValueError::new_err(format!("cannot read the frame: {e}")))
        }
    }
}

/// The frame's columns `used` (fetched as `batch`) as [`Columns`], read
/// by the library's one reader of Arrow arrays (that of Parquet inputs);
/// a value it cannot read is named by its frame row (from 0).
fn frame_view(batch: &RecordBatch, names: &[String], used: &[usize]) -> PyResult<ArrowFrame> {
    ArrowFrame::new(batch, names, used)
        .map_err(|e| python_error(morbus::rows::RowNaming { first: 0, of: None }.name(e)))
}

/// The score columns as an Arrow batch: whole-number scores `Int64`,
/// scores with decimals `Float64`, bands text, flags `Int8`; only the age
/// variants and bands may be null.
fn score_batch(engine: &Engine, columns: Vec<ScoreColumn>, rows: usize) -> RecordBatch {
    let mut fields = Vec::new();
    let mut arrays: Vec<ArrayRef> = Vec::new();
    for (c, col) in engine.columns().iter().zip(columns) {
        let nullable = matches!(
            c.kind,
            ColumnKind::ScoreWithAge { .. } | ColumnKind::Band { .. }
        );
        let a: ArrayRef = match col {
            ScoreColumn::Int(v) => Arc::new(Int64Array::from(v)),
            ScoreColumn::Float(v) => Arc::new(Float64Array::from(v)),
            ScoreColumn::Flag(v) => Arc::new(Int8Array::from(v)),
            ScoreColumn::Band { names, values } => Arc::new(
                values
                    .iter()
                    .map(|b| b.map(|b| names[b as usize].as_str()))
                    .collect::<StringArray>(),
            ),
        };
        fields.push(Field::new(&c.name, a.data_type().clone(), nullable));
        arrays.push(a);
    }
    RecordBatch::try_new_with_options(
        Arc::new(Schema::new(fields)),
        arrays,
        &arrow_array::RecordBatchOptions::new().with_row_count(Some(rows)),
    )
    .expect("score columns of equal length")
}

/// Nullable `Int64` columns `row0`, `row1`, ... as an Arrow stream.
fn rows_stream(columns: Vec<Vec<Option<i64>>>) -> ArrowStream {
    let arrays: Vec<ArrayRef> = columns
        .into_iter()
        .map(|v| Arc::new(Int64Array::from(v)) as ArrayRef)
        .collect();
    let fields: Vec<Field> = (0..arrays.len())
        .map(|k| Field::new(format!("row{k}"), DataType::Int64, true))
        .collect();
    let schema = Arc::new(Schema::new(fields));
    let batch = RecordBatch::try_new(schema.clone(), arrays).expect("columns of equal length");
    ArrowStream::new(vec![batch], schema)
}

/// Scores the columns of a frame. Called by `morbus.score`, which see.
///
/// `names` are the frame's column names; `fetch(indices)` returns an object
/// exposing `__arrow_c_stream__` with those columns, in that order;
/// `options` is the dict of `morbus._options`. Returns `(scores, first_rows,
/// kept_rows, provenance, report)`: the score columns as an Arrow stream;
/// (long layout) the 0-based frame row where each unit first appears; (with
/// `keep`) per kept column the frame row whose value each unit carries
/// (null: none); the provenance as JSON (that of `morbus score
/// --provenance`) and the summary line.
#[pyfunction]
#[pyo3(signature = (names, fetch, options, lists=None))]
#[allow(clippy::type_complexity)]
fn score<'py>(
    py: Python<'py>,
    names: Vec<String>,
    fetch: Bound<'py, PyAny>,
    options: Options,
    lists: Option<PyRef<'py, PyLists>>,
) -> PyResult<(
    ArrowStream,
    Option<ArrowStream>,
    Option<ArrowStream>,
    String,
    String,
)> {
    let request = options.request()?;
    let (engine, cfg) = with_lists(lists, |c| request.resolve(c)).map_err(python_error)?;
    let header = Header { names };
    let used = frame::used_columns(&cfg, &header).map_err(python_error)?;
    let batch = fetch_batch(&fetch, &used)?;
    let view = frame_view(&batch, &header.names, &used)?;
    let scored = py
        .detach(|| frame::score(&engine, &cfg, &header, &view, 0))
        .map_err(python_error)?;
    let rows = scored
        .first_rows
        .as_ref()
        .map_or(frame::Columns::rows(&view), Vec::len);
    let result = score_batch(&engine, scored.columns, rows);
    let schema = result.schema();
    let first_rows = scored
        .first_rows
        .as_ref()
        .map(|r| rows_stream(vec![r.iter().map(|&r| Some(r as i64)).collect()]));
    let kept_rows = (!scored.kept_rows.is_empty()).then(|| {
        rows_stream(
            scored
                .kept_rows
                .iter()
                .map(|c| c.iter().map(|r| r.map(|r| r as i64)).collect())
                .collect(),
        )
    });
    let prov = Provenance::new(&engine, &cfg, &scored.summary).to_json();
    Ok((
        ArrowStream::new(vec![result], schema),
        first_rows,
        kept_rows,
        prov,
        scored.summary.report(),
    ))
}

/// `morbus explain` on a frame. Called by `morbus.explain`.
///
/// Returns `(table, label_rows, report)`: the columns of `morbus explain`
/// after the id, episode and label columns (`row`, `index`, `source_row`,
/// `source_date`, `code_as_written`, `code`, `condition`, `weight`,
/// `status`, `age_points`; `row` and `source_row` are the command line's
/// 1-based data rows, the frame row plus one), (with `label`) the 0-based
/// frame row of each record's label value, and the summary line.
#[pyfunction]
#[pyo3(signature = (names, fetch, options, lists=None))]
fn explain<'py>(
    py: Python<'py>,
    names: Vec<String>,
    fetch: Bound<'py, PyAny>,
    options: Options,
    lists: Option<PyRef<'py, PyLists>>,
) -> PyResult<(ArrowStream, Option<ArrowStream>, String)> {
    let request = options.request()?;
    let (engine, cfg) = with_lists(lists, |c| request.resolve(c)).map_err(python_error)?;
    let header = Header { names };
    let used = frame::used_columns(&cfg, &header).map_err(python_error)?;
    let batch = fetch_batch(&fetch, &used)?;
    let view = frame_view(&batch, &header.names, &used)?;
    let (ex, summary) = py
        .detach(|| frame::explain(&engine, &cfg, &header, &view, 0))
        .map_err(python_error)?;
    let labels = (!cfg.keep.is_empty()).then(|| {
        rows_stream(vec![ex
            .label_rows
            .iter()
            .map(|r| r.map(|r| r as i64))
            .collect()])
    });
    let batch = explain_batch(ex);
    let schema = batch.schema();
    Ok((
        ArrowStream::new(vec![batch], schema),
        labels,
        summary.report(),
    ))
}

/// The typed records of `explain` as an Arrow batch; `weight` and
/// `age_points` are `Int64` when every weighting has whole-number points,
/// else `Float64`.
fn explain_batch(ex: Explained) -> RecordBatch {
    let whole = ex.whole_weights;
    let number = |v: Vec<Option<f64>>| -> ArrayRef {
        if whole {
            Arc::new(Int64Array::from(
                v.into_iter()
                    .map(|x| x.map(|x| x as i64))
                    .collect::<Vec<_>>(),
            ))
        } else {
            Arc::new(Float64Array::from(v))
        }
    };
    let text = |v: Vec<Option<String>>| -> ArrayRef { Arc::new(StringArray::from(v)) };
    let arrays: Vec<(&str, ArrayRef, bool)> = vec![
        ("row", Arc::new(Int64Array::from(ex.row)), false),
        ("index", Arc::new(StringArray::from(ex.index)), false),
        (
            "source_row",
            Arc::new(Int64Array::from(ex.source_row)),
            true,
        ),
        (
            "source_date",
            Arc::new(Date32Array::from(
                ex.source_date
                    .into_iter()
                    .map(|d| d.map(|d| d as i32))
                    .collect::<Vec<_>>(),
            )),
            true,
        ),
        ("code_as_written", text(ex.code_as_written), true),
        ("code", text(ex.code), true),
        ("condition", text(ex.condition), true),
        (
            "weight",
            number(ex.weight.into_iter().map(Some).collect()),
            false,
        ),
        ("status", Arc::new(StringArray::from(ex.status)), false),
        ("age_points", number(ex.age_points), true),
    ];
    let fields: Vec<Field> = arrays
        .iter()
        .map(|(n, a, nullable)| Field::new(*n, a.data_type().clone(), *nullable))
        .collect();
    RecordBatch::try_new(
        Arc::new(Schema::new(fields)),
        arrays.into_iter().map(|(_, a, _)| a).collect(),
    )
    .expect("explain columns of equal length")
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
    m.add_function(wrap_pyfunction!(explain, m)?)?;
    m.add_function(wrap_pyfunction!(compare::compare_frame, m)?)?;
    m.add_function(wrap_pyfunction!(code_status, m)?)?;
    Ok(())
}
