//! `morbus compare` for Python: the frame's used columns arrive through
//! the Arrow C stream interface, as for `morbus.score`, and go typed to the
//! library's [`morbus::frame::compare`] (no text is made of them), the
//! function behind the command line's `compare`, so the numbers are the
//! command line's. The options common to every call are read and checked
//! as for `morbus.score` ([`crate::Options`], [`morbus::frame::Request`]).

use pyo3::prelude::*;

use morbus::compare::{self, CompareOptions, Overdispersion};
use morbus::frame;
use morbus::pipeline::Header;
use morbus::score::IndexSpec;
use morbus::Error;

use crate::{fetch_batch, frame_view, python_error, with_lists, Options, PyLists};

/// Compares index specifications over a frame's columns; returns `(json,
/// text, html or None)`. `names` and `fetch` as for `score`.
#[pyfunction]
#[pyo3(name = "compare", signature = (names, fetch, options, *, outcome, adjust, adjust_cat, adjust_spline, by, cluster, min_expected, overdispersion, folds, seed, reference, report, lists=None))]
#[allow(clippy::too_many_arguments)]
pub(crate) fn compare_frame<'py>(
    py: Python<'py>,
    names: Vec<String>,
    fetch: Bound<'py, PyAny>,
    options: Options,
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
    report: bool,
    lists: Option<PyRef<'py, PyLists>>,
) -> PyResult<(String, String, Option<String>)> {
    let request = options.request()?;
    // Without `index`, every (list, weighting) of the catalogue.
    let engine = with_lists(lists, |cat| -> Result<_, Error> {
        let specs = if request.index.iter().all(|s| s.trim().is_empty()) {
            compare::all_specs(cat)
        } else {
            IndexSpec::parse_many(&request.index.join(","))?
        };
        request.engine(cat, &specs)
    })
    .map_err(python_error)?;
    let cfg = request.config().map_err(python_error)?;
    let overdispersion = match overdispersion.as_deref() {
        None => None,
        Some(m) => Some(Overdispersion::parse(m).ok_or_else(|| {
            pyo3::exceptions::PyValueError::new_err(format!(
                "overdispersion must be 'multiplicative' or 'additive', not '{m}'"
            ))
        })?),
    };
    let opts = CompareOptions {
        outcome,
        adjust,
        adjust_categorical: adjust_cat,
        splines: adjust_spline
            .iter()
            .map(|s| compare::parse_spline(s))
            .collect::<Result<_, _>>()
            .map_err(python_error)?,
        cluster,
        by,
        min_expected,
        overdispersion,
        folds,
        seed,
        reference,
    };
    let header = Header { names };
    let used = frame::compare_columns(&cfg, &opts, &header).map_err(python_error)?;
    let batch = fetch_batch(&fetch, &used)?;
    let view = frame_view(&batch, &header.names, &used)?;
    let result = py.detach(|| -> Result<_, Error> {
        let (c, _) = frame::compare(&engine, &cfg, &opts, &header, &view, 0)?;
        let json = compare::json_text(&c)?;
        Ok((
            json,
            compare::text_table(&c),
            report.then(|| compare::html_report(&c)),
        ))
    });
    result.map_err(python_error)
}
