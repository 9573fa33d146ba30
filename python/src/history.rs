//! Dated patient history (`date=`, `lookback=`, `episode=`,
//! `exclude_primary=`, `primary=`, `poa=`) and `morbus.explain` on frames.
//!
//! The route: the columns a run needs (diagnoses, age, id, episode, date,
//! primary flag, present-on-admission indicator), and only those, are
//! written as delimited text (fields quoted with [`morbus::io::write_field`],
//! typed dates written ISO) and read by the library's own
//! [`History`] reader, the one behind `morbus score --lookback` and
//! `morbus explain`. Windows, exclusions, hierarchy and values are the
//! library's; this module only turns columns into text and results back into
//! typed Arrow columns: one row per input row (wide) or per episode in order
//! of first appearance (long), with the frame row of each episode's first
//! record so that the Python side takes the id and episode values (with their
//! dtypes) from the frame itself.
//!
//! The text uses column names of its own (`d0`, `d1`, ..., `age`, `id`, ...):
//! the frame's names are resolved here against the frame (with the command
//! line's messages), and the few messages of the reader that name a column
//! are given the frame's names back. Line numbers of the text are mapped back
//! to 0-based frame rows.

use std::sync::Arc;

use arrow_array::builder::{Date32Builder, Float64Builder, Int64Builder, StringBuilder};
use arrow_array::cast::AsArray;
use arrow_array::types::*;
use arrow_array::{Array, ArrayRef, BooleanArray, Int64Array, RecordBatch};
use arrow_schema::{DataType, Field, Schema, TimeUnit};
use pyo3::exceptions::{PyKeyError, PyValueError};
use pyo3::prelude::*;

use morbus::io::{write_field, RecordScanner};
use morbus::pipeline::dates::write_iso_date;
use morbus::pipeline::explain::ExplainFormat;
use morbus::pipeline::history::{History, Windows};
use morbus::pipeline::{
    percent_from, poa_columns, poa_values_from, DateFormat, Header, Layout, ScoreConfig, Summary,
    DEFAULT_MAX_UNREADABLE_DATES,
};
use morbus::provenance::Provenance;
use morbus::score::{Engine, IndexSpec, ScoreOptions, Value, DEFAULT_INDICES, MAX_AGE};
use morbus::Error;

use crate::{
    builtin_lists, import_stream, ints, numbers, type_name, ArrowStream, Output, PyLists, Text,
};

/// A column of the frame as the text fields it is written as.
enum Col<'a> {
    Text(Text<'a>),
    /// Whole numbers (ids, episode numbers, flags).
    Int(Vec<Option<i128>>),
    /// Numbers: ages (whole years, decimals truncated), flags.
    Float(Vec<Option<f64>>),
    Bool(&'a BooleanArray),
    /// Dates as days since 1970-01-01, written ISO.
    Days(Vec<Option<i64>>),
}

/// How a role's column is written.
#[derive(Clone, Copy, PartialEq, Eq)]
enum Role {
    Dx,
    Age,
    Id,
    Date,
    Flag,
}

/// Days since 1970-01-01 of a date or time-zone-free timestamp column.
fn days(array: &dyn Array) -> Option<Vec<Option<i64>>> {
    macro_rules! per {
        ($t:ty, $unit:expr) => {
            array
                .as_primitive::<$t>()
                .iter()
                .map(|v| v.map(|x| (x as i64).div_euclid($unit)))
                .collect()
        };
    }
    Some(match array.data_type() {
        DataType::Date32 => per!(Date32Type, 1),
        DataType::Date64 => per!(Date64Type, 86_400_000),
        DataType::Timestamp(unit, None) => match unit {
            TimeUnit::Second => per!(TimestampSecondType, 86_400),
            TimeUnit::Millisecond => per!(TimestampMillisecondType, 86_400_000),
            TimeUnit::Microsecond => per!(TimestampMicrosecondType, 86_400_000_000),
            TimeUnit::Nanosecond => per!(TimestampNanosecondType, 86_400_000_000_000),
        },
        _ => return None,
    })
}

impl Col<'_> {
    /// Appends the field of `row`: what the command line would read from the
    /// frame written as CSV.
    fn write(&self, role: Role, row: usize, out: &mut Vec<u8>) {
        match self {
            Col::Text(t) => write_field(t.get(row), b',', out),
            Col::Int(v) => {
                if let Some(x) = v[row] {
                    out.extend_from_slice(x.to_string().as_bytes());
                }
            }
            Col::Float(v) => match v[row] {
                None => {}
                Some(x) if x.is_nan() => {}
                // An age: whole years, decimals truncated (as
                // `morbus::columnar::read_age_value`); out of range it stays
                // as written, which reads as unreadable.
                Some(x) if role == Role::Age && (0.0..(MAX_AGE + 1) as f64).contains(&x) => {
                    out.extend_from_slice((x.trunc() as u32).to_string().as_bytes())
                }
                Some(x) if x.fract() == 0.0 && x.abs() < 1e15 => {
                    out.extend_from_slice((x as i64).to_string().as_bytes())
                }
                Some(x) => write_field(x.to_string().as_bytes(), b',', out),
            },
            Col::Bool(b) => {
                if !b.is_null(row) {
                    out.extend_from_slice(if b.value(row) { b"true" } else { b"false" });
                }
            }
            Col::Days(v) => {
                if let Some(d) = v[row] {
                    write_iso_date(d, out)
                }
            }
        }
    }
}

/// One used column: its frame name, the role and its synthetic text name.
struct Used {
    name: String,
    role: Role,
    text_name: String,
    what: &'static str,
}

fn view<'a>(array: &'a dyn Array, used: &Used) -> PyResult<Col<'a>> {
    let refuse = |rule: &str| {
        PyValueError::new_err(format!(
            "{} column '{}' holds {} values; {rule}",
            used.what,
            used.name,
            type_name(array.data_type())
        ))
    };
    if array.null_count() == array.len() {
        return Ok(Col::Text(Text::Null));
    }
    match used.role {
        Role::Dx => Text::new(array).map(Col::Text).ok_or_else(|| {
            PyValueError::new_err(format!(
                "diagnosis column '{}' holds {} values, not text; ICD-10 codes are text \
                 (convert the column to strings first if its values really are codes)",
                used.name,
                type_name(array.data_type())
            ))
        }),
        Role::Age => {
            if let Some(v) = numbers(array) {
                Ok(Col::Float(v))
            } else {
                Text::new(array)
                    .map(Col::Text)
                    .ok_or_else(|| refuse("ages must be numbers or text"))
            }
        }
        Role::Id => {
            if let Some(v) = ints(array) {
                Ok(Col::Int(v))
            } else {
                Text::new(array)
                    .map(Col::Text)
                    .ok_or_else(|| refuse("ids must be text or whole numbers"))
            }
        }
        Role::Date => {
            if let DataType::Timestamp(_, Some(tz)) = array.data_type() {
                return Err(PyValueError::new_err(format!(
                    "date column '{}' holds timestamps in time zone {tz}; convert them to local \
                     dates or times without a time zone first",
                    used.name
                )));
            }
            if let Some(v) = days(array) {
                Ok(Col::Days(v))
            } else {
                Text::new(array)
                    .map(Col::Text)
                    .ok_or_else(|| refuse("dates must be text, dates or timestamps"))
            }
        }
        Role::Flag => {
            if let Some(v) = ints(array) {
                Ok(Col::Int(v))
            } else if let Some(v) = numbers(array) {
                Ok(Col::Float(v))
            } else if let DataType::Boolean = array.data_type() {
                Ok(Col::Bool(array.as_boolean()))
            } else {
                Text::new(array)
                    .map(Col::Text)
                    .ok_or_else(|| refuse("it must hold text, numbers or booleans"))
            }
        }
    }
}

/// The run's options, resolved.
struct Run {
    engine: Engine,
    /// The options as given (frame column names), for the provenance.
    cfg: ScoreConfig,
    /// The options over the text (its own column names).
    text_cfg: ScoreConfig,
    used: Vec<Used>,
    /// Frame column of each used column.
    indices: Vec<usize>,
    n_dx: usize,
}

fn value_error(e: Error) -> PyErr {
    crate::value_error(e)
}

fn usage(msg: impl Into<String>) -> PyErr {
    PyValueError::new_err(msg.into())
}

/// Resolves options and columns, with the command line's checks and
/// messages (option names as Python spells them).
#[allow(clippy::too_many_arguments)]
fn resolve(
    names: Vec<String>,
    dx: Vec<String>,
    layout: &str,
    id: Option<String>,
    age: Option<String>,
    index: Option<Vec<String>>,
    flags: bool,
    hierarchy: bool,
    lists: &PyLists,
    dx_sep: Option<String>,
    strict: bool,
    threads: usize,
    hist: HistoryArgs,
) -> PyResult<Run> {
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
            return Err(usage(format!(
                "layout must be 'wide' or 'long', not '{other}'"
            )))
        }
    };
    if layout == Layout::Long && id.is_none() {
        return Err(usage("layout='long' needs id=COLUMN"));
    }
    let dx_sep = match dx_sep.as_deref() {
        None => None,
        Some(s) if s.len() == 1 && s.is_ascii() && s != "\"" && s != "\n" && s != "\r" => {
            Some(s.as_bytes()[0])
        }
        Some(s) => {
            return Err(usage(format!(
                "dx_sep must be one ASCII character, not '{s}'"
            )))
        }
    };
    let (lookback, lookback_lists) = match hist.lookback.as_deref() {
        None => (None, Vec::new()),
        Some(t) => morbus::pipeline::parse_lookback(t, "lookback").map_err(value_error)?,
    };
    let window = match hist.window.as_deref() {
        None => morbus::pipeline::WindowScope::default(),
        Some(w) => morbus::pipeline::WindowScope::parse(w).ok_or_else(|| {
            usage(format!(
                "window takes 'current-and-earlier' or 'earlier-only', not '{w}'"
            ))
        })?,
    };
    if hist.window.is_some() && hist.lookback.is_none() {
        return Err(usage("window= is used with lookback=DAYS (or 'all')"));
    }
    let date_format = match hist.date_format.as_deref() {
        None => DateFormat::Iso,
        Some(p) => DateFormat::from_pattern_checked(p)
            .map_err(|why| usage(format!("date_format '{p}' {why}")))?,
    };
    if hist.date.is_some() && hist.lookback.is_none() && hist.episode.is_none() {
        return Err(usage("date= is used with lookback=DAYS (or 'all')"));
    }
    let poa_values = poa_values_from(&hist.poa_values);
    if poa_values.is_empty() {
        return Err(usage(
            "poa_values is empty; name the values that count (e.g. 'Y,W,1,blank')",
        ));
    }
    let max_unreadable_dates = match &hist.max_unreadable_dates {
        None => DEFAULT_MAX_UNREADABLE_DATES,
        Some(t) => percent_from(t).map_err(|why| usage(format!("max_unreadable_dates {why}")))?,
    };
    let cfg = ScoreConfig {
        dx,
        dx_sep,
        layout,
        id,
        episode: hist.episode,
        date: hist.date,
        date_format,
        lookback,
        lookback_lists,
        window,
        exclude_primary: hist.exclude_primary,
        primary: hist.primary,
        poa: hist.poa,
        poa_values,
        max_unreadable_dates,
        age,
        strict,
        edition: hist.edition,
        threads,
        ..ScoreConfig::default()
    };

    // Columns, against the frame's names, with the command line's messages:
    // KeyError for a column that is not there.
    let header = Header { names };
    let column_error = |e: Error| {
        let m = e.to_string();
        if m.contains(" not found; columns in the input: ")
            || m.contains(" matches no column; columns in the input: ")
        {
            PyKeyError::new_err(m)
        } else {
            value_error(e)
        }
    };
    let dx_cols = header.columns(&cfg.dx, "diagnosis").map_err(column_error)?;
    let one = |name: &Option<String>, role: &str| -> PyResult<Option<usize>> {
        name.as_deref()
            .map(|n| header.column(n, role))
            .transpose()
            .map_err(column_error)
    };
    let age_col = one(&cfg.age, "age")?;
    let id_col = one(&cfg.id, "id")?;
    let episode_col = one(&cfg.episode, "episode")?;
    let date_col = one(&cfg.date, "date")?;
    let primary_col = one(&cfg.primary, "primary-diagnosis")?;
    let poa_cols = match &cfg.poa {
        Some(p) => {
            poa_columns(&header, &dx_cols, p, layout, ("poa=", "dx=")).map_err(column_error)?
        }
        None => Vec::new(),
    };
    if cfg.uses_history() && (id_col.is_none() || date_col.is_none()) {
        return Err(usage("lookback= needs id= (the patient column) and date="));
    }
    if layout == Layout::Long && cfg.exclude_primary && primary_col.is_none() {
        return Err(usage(
            "exclude_primary=True in the long layout needs primary=COLUMN (the column flagging the primary-diagnosis row)",
        ));
    }
    if layout == Layout::Wide && primary_col.is_some() {
        return Err(usage(
            "primary= is for the long layout (one code per row); in the wide layout exclude_primary=True leaves out the first diagnosis column",
        ));
    }
    if layout == Layout::Wide && episode_col.is_some() {
        return Err(usage(
            "episode= is for the long layout; in the wide layout every row is an episode",
        ));
    }
    // Output columns must not collide with the columns kept.
    let kept: Vec<&str> = match layout {
        Layout::Wide => header.names.iter().map(String::as_str).collect(),
        Layout::Long => [id_col, episode_col]
            .into_iter()
            .flatten()
            .map(|c| header.names[c].as_str())
            .collect(),
    };
    for c in engine.columns() {
        if kept.contains(&c.name.as_str()) {
            return Err(usage(format!(
                "output column '{}' already exists in the input; rename that input column",
                c.name
            )));
        }
    }

    let mut used = Vec::new();
    let mut indices = Vec::new();
    for (k, &c) in dx_cols.iter().enumerate() {
        used.push(Used {
            name: header.names[c].clone(),
            role: Role::Dx,
            text_name: format!("d{k}"),
            what: "diagnosis",
        });
        indices.push(c);
    }
    for (col, role, text_name, what) in [
        (age_col, Role::Age, "age", "age"),
        (id_col, Role::Id, "id", "id"),
        (episode_col, Role::Id, "episode", "episode"),
        (date_col, Role::Date, "date", "date"),
        (primary_col, Role::Flag, "primary", "primary-diagnosis"),
    ] {
        if let Some(c) = col {
            used.push(Used {
                name: header.names[c].clone(),
                role,
                text_name: text_name.into(),
                what,
            });
            indices.push(c);
        }
    }
    for (k, &c) in poa_cols.iter().enumerate() {
        used.push(Used {
            name: header.names[c].clone(),
            role: Role::Flag,
            text_name: format!("poa{k}"),
            what: "present-on-admission",
        });
        indices.push(c);
    }
    let text_name = |col: Option<usize>, name: &str| col.map(|_| name.to_string());
    let text_cfg = ScoreConfig {
        dx: (0..dx_cols.len()).map(|k| format!("d{k}")).collect(),
        age: text_name(age_col, "age"),
        id: text_name(id_col, "id"),
        episode: text_name(episode_col, "episode"),
        date: text_name(date_col, "date"),
        primary: text_name(primary_col, "primary"),
        poa: (!poa_cols.is_empty()).then(|| "poa*".to_string()),
        ..cfg.clone()
    };
    Ok(Run {
        engine,
        cfg,
        text_cfg,
        used,
        indices,
        n_dx: dx_cols.len(),
    })
}

/// The dated-history options of a call.
struct HistoryArgs {
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
    edition: morbus::pipeline::Edition,
}

/// The used columns as delimited text, and the line on which each row's
/// record starts (a quoted field may hold line breaks).
fn to_text(run: &Run, cols: &[Vec<Col<'_>>], lens: &[usize]) -> (Vec<u8>, Vec<u64>) {
    let mut out = Vec::new();
    for (k, u) in run.used.iter().enumerate() {
        if k > 0 {
            out.push(b',');
        }
        out.extend_from_slice(u.text_name.as_bytes());
    }
    out.push(b'\n');
    let total: usize = lens.iter().sum();
    let mut starts = Vec::with_capacity(total);
    let mut line = 2u64;
    for (batch, &len) in cols.iter().zip(lens) {
        for row in 0..len {
            starts.push(line);
            let begin = out.len();
            for (k, (c, u)) in batch.iter().zip(&run.used).enumerate() {
                if k > 0 {
                    out.push(b',');
                }
                c.write(u.role, row, &mut out);
            }
            if out.len() == begin {
                // A record of one empty field: an empty line would be
                // skipped by the reader.
                out.extend_from_slice(b"\"\"");
            }
            line += memchr_count(&out[begin..]) + 1;
            out.push(b'\n');
        }
    }
    (out, starts)
}

fn memchr_count(b: &[u8]) -> u64 {
    b.iter().filter(|&&c| c == b'\n').count() as u64
}

/// A reader error with frame rows and names instead of text lines and
/// names.
fn frame_error(run: &Run, starts: &[u64], e: Error) -> PyErr {
    let row = |line: u64| starts.partition_point(|&s| s <= line).saturating_sub(1);
    let names = |mut m: String| {
        'found: for u in &run.used {
            for (from, to) in [
                (
                    format!("in column '{}'", u.text_name),
                    format!("in column '{}'", u.name),
                ),
                (
                    format!("(column '{}' is empty)", u.text_name),
                    format!("(column '{}' is empty)", u.name),
                ),
            ] {
                if let Some(head) = m.strip_suffix(&from) {
                    m = format!("{head}{to}");
                    break 'found;
                }
            }
        }
        if let Some(head) = m.strip_suffix("(expected the --date-format, by default YYYY-MM-DD)") {
            m = format!("{head}(expected the date_format, by default YYYY-MM-DD)");
        }
        m = m
            .replace("--poa-values", "poa_values")
            .replace("--max-unreadable-dates", "max_unreadable_dates")
            .replace("--date-format", "date_format");
        m
    };
    match e {
        Error::Strict {
            line: Some(l),
            message,
        } => PyValueError::new_err(format!("row {}: {} (strict=True)", row(l), names(message))),
        Error::Data {
            line: Some(l),
            message,
        } => PyValueError::new_err(format!("row {}: {}", row(l), names(message))),
        Error::Data {
            line: None,
            message,
        } => PyValueError::new_err(names(message)),
        other => value_error(other),
    }
}

/// Reads the used columns of the frame (`fetch(indices)`) and writes them
/// as text.
fn fetch_text(
    run: &mut Run,
    fetch: &Bound<'_, PyAny>,
    typed_dates: &mut bool,
) -> PyResult<(Vec<u8>, Vec<u64>, usize)> {
    let data = fetch.call1((run.indices.clone(),))?;
    let batches = import_stream(&data)?;
    let mut cols = Vec::with_capacity(batches.len());
    let mut lens = Vec::with_capacity(batches.len());
    for b in &batches {
        if b.num_columns() != run.used.len() {
            return Err(usage(format!(
                "expected {} columns from the frame, got {}",
                run.used.len(),
                b.num_columns()
            )));
        }
        let mut v = Vec::with_capacity(run.used.len());
        for (a, u) in b.columns().iter().zip(&run.used) {
            let c = view(a.as_ref(), u)?;
            if matches!(c, Col::Days(_)) {
                *typed_dates = true;
            }
            v.push(c);
        }
        cols.push(v);
        lens.push(b.num_rows());
    }
    if *typed_dates {
        if let Some(p) = run
            .cfg
            .date
            .as_ref()
            .filter(|_| run.cfg.date_format != DateFormat::Iso)
        {
            return Err(usage(format!(
                "date_format is for dates written as text; column '{p}' holds dates \
                 (leave date_format out)"
            )));
        }
        run.text_cfg.date_format = DateFormat::Iso;
    }
    let run: &Run = run;
    let (text, starts) = fetch.py().detach(|| to_text(run, &cols, &lens));
    let total = lens.iter().sum();
    Ok((text, starts, total))
}

/// Scores a frame from the patient history. Called by `morbus.score` when
/// one of the dated-history options is given.
///
/// Returns `(scores, first_rows, provenance, report)` as
/// [`crate::score`]: `first_rows` (long layout) holds, per output row, the
/// 0-based frame row of the episode's first record.
#[pyfunction]
#[pyo3(signature = (names, fetch, *, dx, layout, id, age, index, flags, hierarchy, lists, dx_sep, strict, threads, date, date_format, lookback, window, episode, exclude_primary, primary, poa, poa_values, max_unreadable_dates=None, edition="any"))]
#[allow(clippy::too_many_arguments)]
pub(crate) fn score_history<'py>(
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
    let hist = HistoryArgs {
        date,
        date_format,
        lookback,
        window,
        episode,
        exclude_primary,
        primary,
        poa,
        poa_values,
        max_unreadable_dates,
        edition: crate::parse_edition(edition)?,
    };
    let mut run = resolve(
        names, dx, layout, id, age, index, flags, hierarchy, lists, dx_sep, strict, threads, hist,
    )?;
    let mut typed = false;
    let (text, starts, total) = fetch_text(&mut run, &fetch, &mut typed)?;
    let run = &run;
    let engine = &run.engine;
    let (batch, first, summary) = py
        .detach(|| -> Result<(RecordBatch, Vec<i64>, Summary), Error> {
            let windows = Windows::new(engine, &run.text_cfg)?;
            let (mut hist, mut summary) =
                History::read(engine, &run.text_cfg, &text[..], Default::default())?;
            hist.resolve(&windows);
            let hist = hist;
            let n = hist.episodes.len();
            let mut out = Output::new(engine, n);
            let mut first = Vec::with_capacity(n);
            let mut bits = vec![0u64; hist.words()];
            let mut scratch = bits.clone();
            let mut values: Vec<Value> = Vec::new();
            for (e, ep) in hist.episodes.iter().enumerate() {
                hist.final_into(engine, e, &mut bits, &mut scratch);
                engine.values(&bits, ep.age(), &mut values);
                out.push(engine, &values);
                first.push(hist.row(e) as i64 - 1);
            }
            summary.rows_written += n as u64;
            summary.units += n as u64;
            Ok((out.finish(engine), first, summary))
        })
        .map_err(|e| frame_error(run, &starts, e))?;
    let mut summary = summary;
    summary.dx_columns = run.used[..run.n_dx]
        .iter()
        .map(|u| u.name.clone())
        .collect();
    if run.cfg.layout == Layout::Wide && batch.num_rows() != total {
        return Err(usage(format!(
            "internal error: {} rows scored for {total} rows",
            batch.num_rows()
        )));
    }
    let schema = batch.schema();
    let first_rows = (run.cfg.layout == Layout::Long).then(|| rows_stream(first));
    let prov = Provenance::new(engine, &run.cfg, &summary).to_json();
    Ok((
        ArrowStream::new(vec![batch], schema),
        first_rows,
        prov,
        summary.report(),
    ))
}

fn rows_stream(rows: Vec<i64>) -> ArrowStream {
    let a: ArrayRef = Arc::new(Int64Array::from(rows));
    let schema = Arc::new(Schema::new(vec![Field::new("row", DataType::Int64, false)]));
    let batch = RecordBatch::try_new(schema.clone(), vec![a]).expect("one column");
    ArrowStream::new(vec![batch], schema)
}

/// `morbus explain` on a frame. Called by `morbus.explain`.
///
/// Returns `(table, report)`: the columns of `morbus explain` after the id
/// and episode columns (`row`, `index`, `source_row`, `source_date`,
/// `code_as_written`, `code`, `condition`, `weight`, `status`,
/// `age_points`; `row` and
/// `source_row` are the command line's 1-based data rows, the frame row plus
/// one) and the summary line.
#[pyfunction]
#[pyo3(signature = (names, fetch, *, dx, layout, id, age, index, hierarchy, lists, dx_sep, strict, threads, date, date_format, lookback, window, episode, exclude_primary, primary, poa, poa_values, max_unreadable_dates=None, edition="any"))]
#[allow(clippy::too_many_arguments)]
pub(crate) fn explain<'py>(
    py: Python<'py>,
    names: Vec<String>,
    fetch: Bound<'py, PyAny>,
    dx: Vec<String>,
    layout: &str,
    id: Option<String>,
    age: Option<String>,
    index: Option<Vec<String>>,
    hierarchy: bool,
    lists: Option<PyRef<'py, PyLists>>,
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
    edition: &str,
) -> PyResult<(ArrowStream, String)> {
    let builtin;
    let lists: &PyLists = match &lists {
        Some(l) => l,
        None => {
            builtin = builtin_lists();
            &builtin
        }
    };
    let hist = HistoryArgs {
        date,
        date_format,
        lookback,
        window,
        episode,
        exclude_primary,
        primary,
        poa,
        poa_values,
        max_unreadable_dates,
        edition: crate::parse_edition(edition)?,
    };
    let mut run = resolve(
        names, dx, layout, id, age, index, false, hierarchy, lists, dx_sep, strict, threads, hist,
    )?;
    let mut typed = false;
    let (text, starts, _) = fetch_text(&mut run, &fetch, &mut typed)?;
    let run = &run;
    let engine = &run.engine;
    let whole = (0..engine.specs().len()).all(|s| engine.decimals(s) == 0);
    let skip = usize::from(run.cfg.id.is_some()) + usize::from(run.cfg.episode.is_some());
    let (batch, summary) = py
        .detach(|| -> Result<(RecordBatch, Summary), Error> {
            let mut csv = Vec::new();
            let summary = morbus::pipeline::explain_stream(
                engine,
                &run.text_cfg,
                ExplainFormat::Csv,
                &text[..],
                &mut csv,
            )?;
            Ok((explain_columns(&csv, skip, whole)?, summary))
        })
        .map_err(|e| frame_error(run, &starts, e))?;
    let schema = batch.schema();
    Ok((ArrowStream::new(vec![batch], schema), summary.report()))
}

/// The CSV written by `explain_stream` as typed columns, leaving out the
/// first `skip` (id, episode) columns; empty cells are nulls.
fn explain_columns(csv: &[u8], skip: usize, whole: bool) -> Result<RecordBatch, Error> {
    let mut row = Int64Builder::new();
    let mut index = StringBuilder::new();
    let mut source_row = Int64Builder::new();
    let mut source_date = Date32Builder::new();
    let mut written = StringBuilder::new();
    let mut code = StringBuilder::new();
    let mut condition = StringBuilder::new();
    let mut weight_i = Int64Builder::new();
    let mut weight_f = Float64Builder::new();
    let mut status = StringBuilder::new();
    let mut points_i = Int64Builder::new();
    let mut points_f = Float64Builder::new();
    let bad = |what: &str| Error::data(None, format!("internal error: explain wrote {what}"));
    let text = |b: &[u8]| String::from_utf8_lossy(b).into_owned();
    let mut first = true;
    RecordScanner::new(b',').scan(csv, true, |rec| -> Result<(), Error> {
        if std::mem::replace(&mut first, false) {
            return Ok(());
        }
        let f = |k: usize| rec.fields.get(skip + k);
        if rec.fields.len() != skip + 10 {
            return Err(bad("a record of another width"));
        }
        let int = |b: &[u8]| -> Result<Option<i64>, Error> {
            if b.is_empty() {
                return Ok(None);
            }
            std::str::from_utf8(b)
                .ok()
                .and_then(|s| s.parse().ok())
                .map(Some)
                .ok_or_else(|| bad("a row number that is not one"))
        };
        let opt = |builder: &mut StringBuilder, b: &[u8]| {
            if b.is_empty() {
                builder.append_null()
            } else {
                builder.append_value(text(b))
            }
        };
        row.append_option(int(f(0))?);
        index.append_value(text(f(1)));
        source_row.append_option(int(f(2))?);
        let d = f(3);
        if d.is_empty() {
            source_date.append_null();
        } else {
            let days = DateFormat::Iso
                .parse(d)
                .ok_or_else(|| bad("a date that is not one"))?;
            source_date.append_value(days);
        }
        opt(&mut written, f(4));
        opt(&mut code, f(5));
        opt(&mut condition, f(6));
        let w = std::str::from_utf8(f(7)).unwrap_or("");
        if whole {
            weight_i.append_option(w.parse::<i64>().ok());
        } else {
            weight_f.append_option(w.parse::<f64>().ok());
        }
        status.append_value(text(f(8)));
        let a = std::str::from_utf8(f(9)).unwrap_or("");
        if whole {
            points_i.append_option(a.parse::<i64>().ok());
        } else {
            points_f.append_option(a.parse::<f64>().ok());
        }
        Ok(())
    })?;
    let weight: ArrayRef = if whole {
        Arc::new(weight_i.finish())
    } else {
        Arc::new(weight_f.finish())
    };
    let arrays: Vec<ArrayRef> = vec![
        Arc::new(row.finish()),
        Arc::new(index.finish()),
        Arc::new(source_row.finish()),
        Arc::new(source_date.finish()),
        Arc::new(written.finish()),
        Arc::new(code.finish()),
        Arc::new(condition.finish()),
        weight,
        Arc::new(status.finish()),
        if whole {
            Arc::new(points_i.finish())
        } else {
            Arc::new(points_f.finish())
        },
    ];
    let names = [
        ("row", false),
        ("index", false),
        ("source_row", true),
        ("source_date", true),
        ("code_as_written", true),
        ("code", true),
        ("condition", true),
        ("weight", false),
        ("status", false),
        ("age_points", true),
    ];
    let fields: Vec<Field> = names
        .iter()
        .zip(&arrays)
        .map(|((n, nullable), a)| Field::new(*n, a.data_type().clone(), *nullable))
        .collect();
    RecordBatch::try_new(Arc::new(Schema::new(fields)), arrays)
        .map_err(|e| Error::data(None, format!("internal error: {e}")))
}
