//! `morbus compare` for Python: the frame arrives as CSV text written by
//! pyarrow's CSV writer (see `morbus/_compare.py`), and goes through the very
//! function the command line calls, so the numbers are the command line's.
//! The options common to every call are read and checked as for
//! `morbus.score` ([`crate::Options`], [`morbus::frame::Request`]).

use pyo3::prelude::*;

use morbus::compare::{self, CompareOptions, Overdispersion};
use morbus::score::IndexSpec;
use morbus::Error;

use crate::{python_error, with_lists, Options, PyLists};

/// Runs the comparison over CSV text; returns `(json, text, html or None)`.
#[pyfunction]
#[pyo3(signature = (data, options, *, outcome, adjust, adjust_cat, adjust_spline, by, cluster, min_expected, overdispersion, folds, seed, reference, report, lists=None))]
#[allow(clippy::too_many_arguments)]
pub(crate) fn compare_csv<'py>(
    py: Python<'py>,
    data: Vec<u8>,
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
    let result = py.detach(|| -> Result<_, Error> {
        let (c, _) = compare::compare(&engine, &cfg, &opts, &data[..])?;
        let json = compare::json_text(&c)?;
        Ok((
            json,
            compare::text_table(&c),
            report.then(|| compare::html_report(&c)),
        ))
    });
    result.map_err(python_error)
}
