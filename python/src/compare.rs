//! `morbus compare` for Python: the frame arrives as CSV text written by
//! pyarrow's CSV writer (see `morbus/_compare.py`), and goes through the very
//! function the command line calls, so the numbers are the command line's.

use pyo3::prelude::*;

use morbus::compare::{self, CompareOptions, Overdispersion};
use morbus::pipeline::{self, DateFormat, Layout, ScoreConfig};
use morbus::score::{Engine, IndexSpec, ScoreOptions};
use morbus::Error;

use crate::{builtin_lists, value_error, PyLists};

fn usage(msg: impl Into<String>) -> PyErr {
    pyo3::exceptions::PyValueError::new_err(msg.into())
}

/// Runs the comparison over CSV text; returns `(json, text, html or None)`.
#[pyfunction]
#[pyo3(signature = (data, *, dx, outcome, adjust, adjust_cat, adjust_spline, by, cluster, min_expected, overdispersion, folds, seed, reference, layout, id, age, index, hierarchy, lists, dx_sep, date, date_format, lookback, episode, exclude_primary, primary, poa, poa_values, threads, report))]
#[allow(clippy::too_many_arguments)]
pub(crate) fn compare_csv<'py>(
    py: Python<'py>,
    data: Vec<u8>,
    dx: Vec<String>,
    outcome: String,
    adjust: Vec<String>,
    adjust_cat: Vec<String>,
    adjust_spline: Vec<String>,
    by: Option<String>,
    cluster: Option<String>,
    min_expected: f64,
    overdispersion: Option<String>,
    folds: Option<usize>,
    seed: u64,
    reference: Option<String>,
    layout: &str,
    id: Option<String>,
    age: Option<String>,
    index: Option<Vec<String>>,
    hierarchy: bool,
    lists: Option<PyRef<'py, PyLists>>,
    dx_sep: Option<String>,
    date: Option<String>,
    date_format: Option<String>,
    lookback: Option<String>,
    episode: Option<String>,
    exclude_primary: bool,
    primary: Option<String>,
    poa: Option<String>,
    poa_values: Vec<String>,
    threads: usize,
    report: bool,
) -> PyResult<(String, String, Option<String>)> {
    let builtin;
    let lists: &PyLists = match &lists {
        Some(l) => l,
        None => {
            builtin = builtin_lists();
            &builtin
        }
    };
    let cat = &lists.catalogue;
    let specs = match &index {
        Some(v) if !v.is_empty() => {
            IndexSpec::parse_many(&v.join(",")).map_err(|e| value_error(e.into()))?
        }
        _ => compare::all_specs(cat),
    };
    let engine = Engine::new(
        cat,
        &specs,
        ScoreOptions {
            hierarchy,
            flags: false,
            age: age.is_some(),
        },
    )
    .map_err(|e| value_error(e.into()))?;
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
    let lookback = match lookback.as_deref() {
        None => None,
        Some("all") => Some(u32::MAX),
        Some(t) => Some(t.trim().parse::<u32>().map_err(|_| {
            usage(format!(
                "lookback takes a whole number of days or 'all', not '{t}'"
            ))
        })?),
    };
    let date_format = match date_format.as_deref() {
        None => DateFormat::Iso,
        Some(p) => DateFormat::from_pattern_checked(p)
            .map_err(|why| usage(format!("date_format '{p}' {why}")))?,
    };
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
    let overdispersion = match overdispersion.as_deref() {
        None => None,
        Some(m) => Some(Overdispersion::parse(m).ok_or_else(|| {
            usage(format!(
                "overdispersion must be 'multiplicative' or 'additive', not '{m}'"
            ))
        })?),
    };
    let cfg = ScoreConfig {
        dx,
        dx_sep,
        layout,
        id,
        episode,
        date,
        date_format,
        lookback,
        exclude_primary,
        primary,
        poa,
        poa_values: pipeline::poa_values_from(&poa_values),
        age,
        threads,
        ..ScoreConfig::default()
    };
    let opts = CompareOptions {
        outcome,
        adjust,
        adjust_categorical: adjust_cat,
        splines: adjust_spline
            .iter()
            .map(|s| compare::parse_spline(s))
            .collect::<Result<_, _>>()
            .map_err(value_error)?,
        cluster,
        by,
        min_expected,
        overdispersion,
        folds,
        seed,
        reference,
    };
    let result = py.detach(|| -> Result<_, Error> {
        let (c, _) = compare::compare(&engine, &cfg, &opts, &data[..])?;
        let json = compare::json_text(&c)?;
        Ok((
            json,
            compare::text_table(&c),
            report.then(|| compare::html_report(&c)),
        ))
    });
    result.map_err(value_error)
}
