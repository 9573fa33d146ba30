//! `compare`: how several index specifications behave on one extract and
//! how well each discriminates a binary outcome.
//!
//! The unit is the episode (a wide row, or a long-layout episode; in a long
//! extract without `--episode`, each id). Condition sets come from the
//! in-memory history ([`crate::pipeline::history::History`]), so lookback,
//! hierarchies and the primary/present-on-admission rules apply exactly as in
//! `score`.
//!
//! Which units are analysed: those with an outcome of 0 or 1, a value for
//! every adjustment column and, with `--age`, a readable age. Every result
//! (prevalence, distributions, c-statistics, models, pairwise tests) is
//! computed on that same set, so the indices are compared on equal terms;
//! the units left out are counted by reason.
//!
//! The outcome, adjustment, `--by` and `--cluster` columns are read with the
//! history, in the same pass, from text or typed rows alike
//! ([`History::read_with_values`]): a unit's value is the first non-empty
//! one among its rows, and a later row of the unit with another non-empty
//! value is an error naming both rows.
//!
//! Values read as missing (outcome and adjustment columns): an empty field,
//! a null or NaN, `NA`, `N/A`, `N/K`, `NK`, `NULL` or `.` (any case). The
//! outcome is a value reading as the number 0 or 1 (`0`, `1`, `1.0`; a
//! whole number 0 or 1, a number 0.0 or 1.0) or as true/false (`true`,
//! `FALSE`, a true/false value); any other value is an error naming the
//! line (text) or row (typed rows). A numeric adjustment column's value is
//! a number (text as written, a whole number, a number; true/false as 1/0);
//! anything else is an error naming the line. A categorical adjustment
//! column enters the models as one 0/1 indicator per level except the
//! reference, which is the first level in byte order of the values as
//! written (so `F` before `M`; a typed value's level is its text form:
//! `3`, `2.5`, `true`, `2024-01-31`).
//!
//! The numerics are those of [`crate::stats`]: c-statistic and DeLong
//! covariance (DeLong, DeLong & Clarke-Pearson, Biometrics 1988;44:837-45),
//! logistic regression by Newton–Raphson with Wald standard errors,
//! Spearman's rank correlation, descriptive summaries.
//!
//! Nothing here is NaN: what cannot be computed (a constant score, a
//! separated model, too few events for a variance) is `None` in the result
//! with a note saying why.

mod folds;
mod providers;
mod report;
mod table;

use std::collections::BTreeMap;

use serde::Serialize;

use crate::lists::{Catalogue, SCALE};
use crate::pipeline::history::{History, Input, ValueColumn};
use crate::pipeline::{Layout, ScoreConfig, Summary as ReadSummary};
use crate::rows::Field;
use crate::score::{ColumnKind, Engine, IndexSpec, Value};
use crate::stats::{self, StatsError};
use crate::Error;

pub use folds::{assign_folds, CalibrationGroup, FoldResult, OutOfSample, MAX_FOLDS};
pub use providers::{
    Agreement, Change, Dispersion, FunnelPoint, LargestChange, Overdispersion, Position,
    ProviderRow, ProviderSpec, Providers, MAX_PROVIDERS,
};
pub use report::html_report;
pub use table::text_table;

/// Version of the JSON layout written by `--json` (see
/// [`Comparison`]); raised when a field changes meaning or goes away.
pub const JSON_FORMAT_VERSION: u32 = 1;

/// The caution printed with every comparison.
pub const CAUTION: &str = "These indices and the models fitted here describe groups of \
patients for research and risk adjustment. They are not fit to judge, rank or treat an \
individual patient. The c-statistics and models are estimated on this extract only: \
they are not validated prediction tools, and differences between indices depend on \
local coding practice, the lookback and the outcome chosen.";

/// Most levels a categorical adjustment column may have.
pub const MAX_LEVELS: usize = 50;

/// Default of [`CompareOptions::min_expected`].
pub const DEFAULT_MIN_EXPECTED: f64 = 5.0;
/// Default of [`CompareOptions::seed`].
pub const DEFAULT_SEED: u64 = 20_261_203;

/// What to compare against what.
#[derive(Clone, Debug)]
pub struct CompareOptions {
    /// The 0/1 outcome column.
    pub outcome: String,
    /// Numeric adjustment columns (exact names).
    pub adjust: Vec<String>,
    /// Categorical adjustment columns (exact names).
    pub adjust_categorical: Vec<String>,
    /// Numeric adjustment columns entered as restricted cubic splines
    /// (`--adjust-spline COL[:K]`): the column and its number of knots. A
    /// column named here need not be in `adjust` (its linear term is
    /// added either way).
    pub splines: Vec<(String, usize)>,
    /// Provider column (`--by`): observed/expected ratios per provider.
    pub by: Option<String>,
    /// Cluster column (`--cluster`, e.g. a patient id): cluster-robust
    /// standard errors of the models and clustered c-statistic intervals.
    pub cluster: Option<String>,
    /// Providers with an expected count below this are listed, not judged.
    pub min_expected: f64,
    /// Funnel limits allowing for over-dispersion.
    pub overdispersion: Option<Overdispersion>,
    /// Cross-validation folds (`--folds`), formed by the `--id` column.
    pub folds: Option<usize>,
    /// Seed of the fold assignment.
    pub seed: u64,
    /// Compare every specification with this one only (a name such as
    /// `charlson_quan2011` or a specification such as `charlson:quan2011`).
    pub reference: Option<String>,
}

impl Default for CompareOptions {
    fn default() -> Self {
        CompareOptions {
            outcome: String::new(),
            adjust: Vec::new(),
            adjust_categorical: Vec::new(),
            splines: Vec::new(),
            by: None,
            cluster: None,
            min_expected: DEFAULT_MIN_EXPECTED,
            overdispersion: None,
            folds: None,
            seed: DEFAULT_SEED,
            reference: None,
        }
    }
}

/// The comparison as the text of the `--json` file (and of Python's
/// `morbus.compare`).
pub fn json_text(c: &Comparison) -> Result<String, Error> {
    serde_json::to_string_pretty(c)
        .map_err(|e| Error::Usage(format!("cannot encode the results as JSON: {e}")))
}

/// Every (list, weighting) of a catalogue, in catalogue order: the default
/// set of `compare`.
pub fn all_specs(catalogue: &Catalogue) -> Vec<IndexSpec> {
    catalogue
        .lists()
        .iter()
        .flat_map(|l| {
            l.weightings.iter().map(|w| IndexSpec {
                list: l.name.clone(),
                weighting: Some(w.name.clone()),
            })
        })
        .collect()
}

/// The result of a comparison; serialised as the `--json` file.
#[derive(Clone, Debug, Serialize)]
pub struct Comparison {
    /// [`JSON_FORMAT_VERSION`].
    pub format_version: u32,
    pub morbus_version: String,
    pub outcome: String,
    /// Lookback in days; `"all"` for the whole history; `null` for none;
    /// with per-list windows as `--lookback` takes them (`365,hfrs=730`).
    pub lookback: Option<String>,
    /// With a lookback, which episodes count: `current-and-earlier` or
    /// `earlier-only`.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub window: Option<String>,
    pub hierarchy: bool,
    pub units: UnitCounts,
    /// The terms every model is adjusted for, in model order.
    pub adjustment: Vec<AdjustmentTerm>,
    /// Restricted cubic splines of adjustment columns (`--adjust-spline`).
    pub splines: Vec<Spline>,
    /// The model of the outcome on the adjustment terms alone (when there
    /// are any): the baseline against which each index's model is read.
    pub adjustment_model: Option<Model>,
    /// Notes about the adjustment-only model (why it is missing).
    pub adjustment_notes: Vec<String>,
    pub indices: Vec<IndexResult>,
    /// Every pair of indices (a before b in index order), or with
    /// `--reference` the reference (a) against each other index (b).
    pub pairs: Vec<PairResult>,
    /// How many pairs were compared, and how many all pairs would be.
    pub pairs_compared: PairsCompared,
    /// With `--by`.
    pub providers: Option<Providers>,
    /// With `--folds`.
    pub cross_validation: Option<CrossValidation>,
    /// With `--cluster`.
    pub clusters: Option<Clusters>,
    /// Notes that concern the whole run.
    pub notes: Vec<String>,
    pub caution: String,
}

impl Comparison {
    /// Every note of the comparison, each prefixed with what it concerns,
    /// in the order the table and the report list them: the whole run, the
    /// adjustment-only model, each index, each pair, each index out of
    /// sample, the providers.
    pub fn all_notes(&self) -> Vec<String> {
        let mut notes: Vec<String> = self.notes.clone();
        for n in &self.adjustment_notes {
            notes.push(format!("adjustment-only model: {n}"));
        }
        for ix in &self.indices {
            for n in &ix.notes {
                notes.push(format!("{}: {n}", ix.name));
            }
        }
        for p in &self.pairs {
            for n in &p.notes {
                notes.push(format!("{} vs {}: {n}", p.a, p.b));
            }
        }
        for ix in &self.indices {
            for n in ix.out_of_sample.iter().flat_map(|o| &o.notes) {
                notes.push(format!("{} (out of sample): {n}", ix.name));
            }
        }
        if let Some(p) = &self.providers {
            notes.extend(p.notes.iter().map(|n| format!("providers: {n}")));
        }
        notes
    }
}

/// The pairs compared.
#[derive(Clone, Debug, Serialize)]
pub struct PairsCompared {
    /// The `--reference` index, or `null` for all pairs.
    pub reference: Option<String>,
    /// Pairs compared (DeLong tests made, at most).
    pub tests: usize,
    /// Pairs among the indices that could be compared: k(k − 1)/2.
    pub tests_if_all_pairs: usize,
}

/// The clusters of `--cluster`.
#[derive(Clone, Debug, Serialize)]
pub struct Clusters {
    pub column: String,
    /// Clusters among the analysed units.
    pub clusters: usize,
    /// Analysed units without a value in the column: each is a cluster of
    /// its own.
    pub units_without_cluster: usize,
    /// Largest cluster (analysed units).
    pub largest: usize,
}

/// How the folds were formed.
#[derive(Clone, Debug, Serialize)]
pub struct CrossValidation {
    pub folds: usize,
    pub seed: u64,
    /// The `--id` column whose units stay together, or `null` (each unit
    /// alone).
    pub grouped_by: Option<String>,
    /// Analysed units per fold.
    pub fold_units: Vec<usize>,
}

/// Likelihood-ratio test of a score added to the adjustment terms.
#[derive(Clone, Debug, Serialize)]
pub struct AddedValue {
    /// 2 (log L with the score − log L without).
    pub statistic: f64,
    pub df: usize,
    pub p_value: f64,
    /// `adjustment` (the adjustment-only model) or `intercept` (no
    /// adjustment terms).
    pub versus: String,
}

/// Which units were analysed, and why the others were not.
#[derive(Clone, Debug, Default, Serialize)]
pub struct UnitCounts {
    /// Units (episodes) in the extract.
    pub read: u64,
    /// Left out: outcome missing.
    pub missing_outcome: u64,
    /// Left out (outcome present): a missing adjustment value.
    pub missing_adjustment: u64,
    /// Left out (outcome and adjustment present): age missing or
    /// unreadable, with `--age`.
    pub missing_age: u64,
    /// Units analysed.
    pub analysed: u64,
    /// Analysed units with outcome 1.
    pub events: u64,
    /// `events / analysed`.
    pub event_share: f64,
}

impl UnitCounts {
    /// Why units were left out, one phrase per reason with its count (none
    /// when every unit was analysed), as the table and the report say it.
    pub fn left_out(&self) -> Vec<String> {
        [
            (self.missing_outcome, "without an outcome"),
            (self.missing_adjustment, "with a missing adjustment value"),
            (self.missing_age, "without a readable age"),
        ]
        .into_iter()
        .filter(|&(n, _)| n > 0)
        .map(|(n, why)| format!("{} {why}", fmt_count(n)))
        .collect()
    }
}

/// A restricted cubic spline of a numeric adjustment column.
#[derive(Clone, Debug, Serialize)]
pub struct Spline {
    pub column: String,
    /// Knot positions, ascending (the quantiles below of the analysed
    /// units' values).
    pub knots: Vec<f64>,
    /// The quantiles the knots are placed at (Harrell 2015, Table 2.3).
    pub quantiles: Vec<f64>,
    /// The model terms of the spline: the column itself (linear), then the
    /// K − 2 nonlinear terms.
    pub terms: Vec<String>,
}

/// Parses `COL[:K]` of `--adjust-spline` (K: 3 to 7, default 4).
pub fn parse_spline(text: &str) -> Result<(String, usize), Error> {
    let text = text.trim();
    let (col, k) = match text.rsplit_once(':') {
        Some((c, k)) if k.trim().chars().all(|ch| ch.is_ascii_digit()) && !k.trim().is_empty() => {
            (c.trim(), k.trim().parse::<usize>().unwrap_or(0))
        }
        _ => (text, stats::DEFAULT_KNOTS),
    };
    if col.is_empty() {
        return Err(Error::Usage(format!(
            "--adjust-spline '{text}': give a column, optionally with :K knots (e.g. age:4)"
        )));
    }
    if stats::knot_quantiles(k).is_none() {
        return Err(Error::Usage(format!(
            "--adjust-spline '{text}': a restricted cubic spline takes {} to {} knots, not {k}",
            stats::MIN_KNOTS,
            stats::MAX_KNOTS
        )));
    }
    Ok((col.to_string(), k))
}

/// One term of the adjustment.
#[derive(Clone, Debug, Serialize)]
pub struct AdjustmentTerm {
    /// Name in the models: the column, or `column=level` for a level of a
    /// categorical column.
    pub name: String,
    pub column: String,
    /// `numeric`, `categorical`, or `spline` (a nonlinear term of a
    /// restricted cubic spline of `column`).
    pub kind: String,
    /// Categorical: the level this indicator stands for.
    pub level: Option<String>,
    /// Categorical: the reference level.
    pub reference: Option<String>,
}

/// Results for one index specification.
#[derive(Clone, Debug, Serialize)]
pub struct IndexResult {
    /// Column name as in `score` output, e.g. `charlson_quan2011`.
    pub name: String,
    /// `LIST:WEIGHTING`.
    pub spec: String,
    pub list: String,
    pub weighting: String,
    /// The weighting's label.
    pub label: String,
    /// Whether the score includes the list's age points (`--age`).
    pub with_age: bool,
    pub distribution: Distribution,
    pub histogram: Vec<Bin>,
    /// Every condition of the list, after the hierarchy.
    pub prevalence: Vec<Prevalence>,
    /// `None` with a note when undefined.
    pub c_statistic: Option<CStatistic>,
    /// Empirical ROC curve `[false-positive rate, true-positive rate]`,
    /// from (0, 0) to (1, 1); empty when the score is constant.
    pub roc: Vec<[f64; 2]>,
    /// Outcome on the score plus the adjustment terms.
    pub model: Option<Model>,
    /// Likelihood-ratio test of the score over the adjustment terms alone.
    pub added_value: Option<AddedValue>,
    /// With `--folds`: cross-validated figures.
    pub out_of_sample: Option<OutOfSample>,
    pub notes: Vec<String>,
}

/// Score distribution over the analysed units.
#[derive(Clone, Debug, Serialize)]
pub struct Distribution {
    pub n: usize,
    pub mean: f64,
    /// `None` for a single unit.
    pub sd: Option<f64>,
    pub min: f64,
    pub q1: f64,
    pub median: f64,
    pub q3: f64,
    pub max: f64,
    /// Share of units scoring exactly 0.
    pub zero_share: f64,
    /// Number of distinct score values.
    pub distinct: usize,
}

/// Units whose score lies in `[from, to)` (the last bin includes `to`).
#[derive(Clone, Debug, Serialize)]
pub struct Bin {
    pub from: f64,
    pub to: f64,
    pub count: u64,
}

/// Units with a condition.
#[derive(Clone, Debug, Serialize)]
pub struct Prevalence {
    pub key: String,
    pub label: String,
    pub count: u64,
    /// `count / analysed`.
    pub share: f64,
}

/// c-statistic of the score alone.
#[derive(Clone, Debug, Serialize)]
pub struct CStatistic {
    pub estimate: f64,
    /// DeLong standard error; `None` with fewer than 2 units of an outcome.
    pub std_error: Option<f64>,
    /// 95% interval, estimate ± 1.96·SE clipped to [0, 1].
    pub ci95: Option<[f64; 2]>,
    /// With `--cluster`: standard error and interval allowing for the
    /// clusters (Obuchowski 1997).
    pub cluster_std_error: Option<f64>,
    pub cluster_ci95: Option<[f64; 2]>,
}

/// A fitted logistic model.
#[derive(Clone, Debug, Serialize)]
pub struct Model {
    /// Intercept first.
    pub terms: Vec<Term>,
    pub c_statistic: f64,
    pub aic: f64,
    pub log_likelihood: f64,
    pub n: usize,
    pub events: usize,
    pub iterations: usize,
}

/// One coefficient.
#[derive(Clone, Debug, Serialize)]
pub struct Term {
    pub name: String,
    pub estimate: f64,
    pub std_error: f64,
    pub z: f64,
    pub p_value: f64,
    /// `exp(estimate)`; `None` when it overflows.
    pub odds_ratio: Option<f64>,
    /// With `--cluster`: the cluster-robust standard error, its z and
    /// p-value (`null` without clusters).
    pub cluster_std_error: Option<f64>,
    pub cluster_z: Option<f64>,
    pub cluster_p_value: Option<f64>,
}

/// Comparison of two indices on the same units.
#[derive(Clone, Debug, Serialize)]
pub struct PairResult {
    pub a: String,
    pub b: String,
    /// DeLong test of c(a) − c(b); `None` with a note when undefined.
    pub delong: Option<PairTest>,
    /// Spearman's ρ of the two scores.
    pub spearman: Option<f64>,
    pub notes: Vec<String>,
}

/// DeLong test of a difference in c-statistics.
#[derive(Clone, Debug, Serialize)]
pub struct PairTest {
    pub difference: f64,
    pub std_error: f64,
    pub z: f64,
    pub p_value: f64,
    pub ci95: [f64; 2],
    /// With `--cluster`: the same difference tested with the clustered
    /// covariance (Obuchowski 1997); `null` without clusters or when its
    /// variance is 0.
    pub cluster: Option<ClusteredTest>,
}

/// A difference of c-statistics tested allowing for clusters.
#[derive(Clone, Debug, Serialize)]
pub struct ClusteredTest {
    pub std_error: f64,
    pub z: f64,
    pub p_value: f64,
    pub ci95: [f64; 2],
}

/// Values read as missing in the outcome and adjustment columns.
fn is_missing(v: &[u8]) -> bool {
    v.is_empty()
        || [&b"NA"[..], b"N/A", b"N/K", b"NK", b"NULL", b"."]
            .iter()
            .any(|m| m.eq_ignore_ascii_case(v))
}

fn lossy(v: &[u8]) -> String {
    String::from_utf8_lossy(v).into_owned()
}

/// A finite number, or `None`.
fn parse_number(v: &[u8]) -> Option<f64> {
    let s = std::str::from_utf8(v).ok()?;
    // Rust accepts "inf", "nan", "infinity": not numbers in an extract.
    if !s
        .bytes()
        .all(|b| b.is_ascii_digit() || matches!(b, b'.' | b'-' | b'+' | b'e' | b'E'))
    {
        return None;
    }
    s.parse::<f64>().ok().filter(|x| x.is_finite())
}

/// `true`/`false` in any case.
fn truth(v: &[u8]) -> Option<bool> {
    if v.eq_ignore_ascii_case(b"true") {
        Some(true)
    } else if v.eq_ignore_ascii_case(b"false") {
        Some(false)
    } else {
        None
    }
}

/// A unit's value as shown in messages.
fn shown(f: Field<'_>) -> String {
    lossy(&f.text_or_empty())
}

/// An outcome value: `Ok(None)` missing, `Err(())` not an outcome. Text
/// reading as the number 0 or 1 or as true/false; a whole number 0 or 1; a
/// number 0.0 or 1.0; true/false.
fn read_outcome(f: Field<'_>) -> Result<Option<bool>, ()> {
    let x = match f {
        Field::Null => return Ok(None),
        Field::Text(t) if is_missing(t) => return Ok(None),
        Field::Text(t) => match truth(t) {
            Some(b) => return Ok(Some(b)),
            None => parse_number(t).ok_or(())?,
        },
        Field::Integer(i) => i as f64,
        Field::Number(x) if x.is_nan() => return Ok(None),
        Field::Number(x) => x,
        Field::Logical(b) => return Ok(Some(b)),
        Field::Date(_) => return Err(()),
    };
    if x == 0.0 {
        Ok(Some(false))
    } else if x == 1.0 {
        Ok(Some(true))
    } else {
        Err(())
    }
}

/// A numeric adjustment value: `Ok(None)` missing, `Err(())` not a
/// number. Text as written (see [`parse_number`]; `true`/`false` as 1/0),
/// a whole number, a finite number, true/false as 1/0.
fn read_number(f: Field<'_>) -> Result<Option<f64>, ()> {
    match f {
        Field::Null => Ok(None),
        Field::Text(t) if is_missing(t) => Ok(None),
        Field::Text(t) => match truth(t) {
            Some(b) => Ok(Some(if b { 1.0 } else { 0.0 })),
            None => parse_number(t).map(Some).ok_or(()),
        },
        Field::Integer(i) => Ok(Some(i as f64)),
        Field::Number(x) if x.is_nan() => Ok(None),
        Field::Number(x) if x.is_finite() => Ok(Some(x)),
        Field::Number(_) => Err(()),
        Field::Logical(b) => Ok(Some(if b { 1.0 } else { 0.0 })),
        Field::Date(_) => Err(()),
    }
}

/// A label (categorical level, provider, cluster) by its key, written to
/// `out` ([`Field::key_into`]: text as written, a typed value by its kind
/// and value, not written out as text); `false` when missing.
fn label_key(f: Field<'_>, out: &mut Vec<u8>) -> bool {
    out.clear();
    match f {
        Field::Text(t) if is_missing(t) => false,
        Field::Text(_) => {
            f.key_into(out);
            true
        }
        f => f.key_into(out),
    }
}

/// A label's text, as shown: text as written, a typed value as a delimited
/// extract would hold it.
fn label_text(key: &[u8]) -> Vec<u8> {
    crate::rows::key_field(key).text_or_empty().into_owned()
}

/// Labels numbered by key, as `(text, number)` in the byte order of their
/// text (each written out once).
fn labels_in_order<'a>(
    numbered: impl IntoIterator<Item = (&'a Vec<u8>, &'a u32)>,
) -> Vec<(Vec<u8>, u32)> {
    let mut named: Vec<(Vec<u8>, u32)> = numbered
        .into_iter()
        .map(|(k, &id)| (label_text(k), id))
        .collect();
    named.sort();
    named
}

/// One index being compared: a score column of the engine.
struct Slot {
    spec: usize,
    with_age: bool,
    column: usize,
}

/// Runs the comparison over an extract: delimited text, or typed rows (a
/// Parquet file's, a data frame's) read without any text in between.
// Parallel per-column arrays are indexed by column number throughout.
#[allow(clippy::needless_range_loop)]
pub fn compare<'a>(
    engine: &Engine,
    cfg: &ScoreConfig,
    opts: &CompareOptions,
    input: impl Into<Input<'a>>,
) -> Result<(Comparison, ReadSummary), Error> {
    let mut seen: Vec<&str> = vec![opts.outcome.as_str()];
    for c in opts.adjust.iter().chain(&opts.adjust_categorical) {
        if seen.contains(&c.as_str()) {
            return Err(Error::Usage(if *c == opts.outcome {
                format!("column '{c}' is the outcome; it cannot also be an adjustment")
            } else {
                format!("adjustment column '{c}' is named twice")
            }));
        }
        seen.push(c);
    }
    // Numeric columns: --adjust, then spline columns not among them.
    let mut numeric_names: Vec<String> = opts.adjust.clone();
    for (i, (c, _)) in opts.splines.iter().enumerate() {
        if *c == opts.outcome || opts.adjust_categorical.contains(c) {
            return Err(Error::Usage(format!(
                "--adjust-spline column '{c}' is {}",
                if *c == opts.outcome {
                    "the outcome"
                } else {
                    "also a categorical adjustment (--adjust-cat)"
                }
            )));
        }
        if opts.splines[..i].iter().any(|(d, _)| d == c) {
            return Err(Error::Usage(format!(
                "--adjust-spline column '{c}' is named twice"
            )));
        }
        if !numeric_names.contains(c) {
            numeric_names.push(c.clone());
        }
    }
    // The columns each unit carries, read with the history: outcome,
    // numeric and categorical adjustments, then --by and --cluster.
    let column = |name: &String, role: &'static str| ValueColumn {
        name: name.clone(),
        role,
    };
    let mut extra = vec![column(&opts.outcome, "outcome")];
    extra.extend(numeric_names.iter().map(|n| column(n, "adjustment")));
    extra.extend(
        opts.adjust_categorical
            .iter()
            .map(|n| column(n, "adjustment")),
    );
    if let Some(k) = opts.folds {
        if !(2..=MAX_FOLDS).contains(&k) {
            return Err(Error::Usage(format!(
                "--folds {k}: give between 2 and {MAX_FOLDS} folds"
            )));
        }
    }
    if !(opts.min_expected >= 0.0 && opts.min_expected.is_finite()) {
        return Err(Error::Usage(format!(
            "--min-expected {}: give a number of at least 0",
            opts.min_expected
        )));
    }
    for (what, col) in [("--by", &opts.by), ("--cluster", &opts.cluster)] {
        if col.as_deref() == Some(opts.outcome.as_str()) {
            return Err(Error::Usage(format!(
                "{what} column '{}' is the outcome",
                opts.outcome
            )));
        }
    }
    if opts.by.is_none() && opts.overdispersion.is_some() {
        return Err(Error::Usage(
            "--overdispersion needs --by (providers to compare)".into(),
        ));
    }
    let by_col = opts.by.as_ref().map(|b| {
        extra.push(column(b, "adjustment"));
        extra.len() - 1
    });
    let cluster_col = opts.cluster.as_ref().map(|c| {
        extra.push(column(c, "adjustment"));
        extra.len() - 1
    });
    // Folds are formed by the --id column: the history's patient.
    let by_id = opts.folds.is_some() && cfg.id.is_some();
    let (hist, mut summary) =
        History::read_with_values(engine, cfg, input, Default::default(), &extra)?;
    summary.units = hist.episodes.len() as u64;
    let mut hist = hist;
    hist.resolve(
        &crate::pipeline::history::Windows::new(engine, cfg)?,
        crate::pipeline::threads(cfg),
    );
    let resolved = hist.final_sets(engine);
    let w = hist.words();
    let nnum = numeric_names.len();
    let ncat = opts.adjust_categorical.len();

    // The indices: score columns of the engine.
    let slots: Vec<Slot> = engine
        .columns()
        .iter()
        .enumerate()
        .filter_map(|(i, c)| match c.kind {
            ColumnKind::Score { spec } => Some(Slot {
                spec,
                with_age: false,
                column: i,
            }),
            ColumnKind::ScoreWithAge { spec } => Some(Slot {
                spec,
                with_age: true,
                column: i,
            }),
            _ => None,
        })
        .collect();
    let needs_age = slots.iter().any(|s| s.with_age);

    // Which units, with their outcome and adjustment values.
    let mut units = UnitCounts {
        read: hist.episodes.len() as u64,
        ..UnitCounts::default()
    };
    let mut kept: Vec<usize> = Vec::new();
    let mut y: Vec<bool> = Vec::new();
    let mut numeric: Vec<Vec<f64>> = vec![Vec::new(); nnum];
    let mut categorical: Vec<Vec<u32>> = vec![Vec::new(); ncat];
    let mut levels: Vec<BTreeMap<Vec<u8>, u32>> = vec![BTreeMap::new(); ncat];
    let mut row_num = vec![0.0; nnum];
    // Each categorical value of the unit being read, by its key.
    let mut row_cat: Vec<Vec<u8>> = vec![Vec::new(); ncat];
    let mut label = Vec::new();
    // Provider and fold group of each analysed unit, numbered by appearance.
    let mut provider_ids: std::collections::HashMap<Vec<u8>, u32> = Default::default();
    let mut provider_of: Vec<Option<u32>> = Vec::new();
    let mut group_ids: std::collections::HashMap<Vec<u8>, u32> = Default::default();
    let mut group_of: Vec<Option<u32>> = Vec::new();
    let mut cluster_ids: std::collections::HashMap<Vec<u8>, u32> = Default::default();
    let mut cluster_raw: Vec<Option<u32>> = Vec::new();
    // Looked up before inserting: a key is copied once per distinct value.
    let number = |map: &mut std::collections::HashMap<Vec<u8>, u32>, v: &[u8]| -> u32 {
        match map.get(v) {
            Some(&id) => id,
            None => {
                let id = map.len() as u32;
                map.insert(v.to_vec(), id);
                id
            }
        }
    };
    'units: for (e, ep) in hist.episodes.iter().enumerate() {
        let outcome = match hist.value(e, 0) {
            None => None,
            Some((v, line)) => read_outcome(v).map_err(|()| {
                hist.row_error(
                    line,
                    format!(
                        "outcome column '{}' holds '{}': expected 0 or 1, or true/false (empty, NA, N/A, N/K, NK, NULL or . for missing)",
                        opts.outcome,
                        shown(v)
                    ),
                )
            })?,
        };
        let Some(outcome) = outcome else {
            units.missing_outcome += 1;
            continue;
        };
        let mut missing = false;
        for k in 0..nnum {
            let Some((v, line)) = hist.value(e, 1 + k) else {
                missing = true;
                continue;
            };
            match read_number(v) {
                Ok(Some(x)) => row_num[k] = x,
                Ok(None) => missing = true,
                Err(()) => {
                    return Err(hist.row_error(
                        line,
                        format!(
                            "adjustment column '{}' holds '{}', which is not a number \
                             (for a categorical column use --adjust-cat)",
                            numeric_names[k],
                            shown(v)
                        ),
                    ))
                }
            }
        }
        for k in 0..ncat {
            let present = hist
                .value(e, 1 + nnum + k)
                .is_some_and(|(v, _)| label_key(v, &mut row_cat[k]));
            if !present {
                missing = true;
            }
        }
        if missing {
            units.missing_adjustment += 1;
            continue 'units;
        }
        if needs_age && ep.age().is_none() {
            units.missing_age += 1;
            continue;
        }
        kept.push(e);
        y.push(outcome);
        if let Some(c) = by_col {
            provider_of.push(
                hist.value(e, c)
                    .is_some_and(|(v, _)| label_key(v, &mut label))
                    .then(|| number(&mut provider_ids, &label)),
            );
            if provider_ids.len() > MAX_PROVIDERS {
                return Err(Error::Usage(format!(
                    "--by column '{}' has more than {MAX_PROVIDERS} distinct values; is it an \
                     identifier rather than a provider?",
                    opts.by.as_deref().unwrap_or_default()
                )));
            }
        }
        if by_id {
            // The unit's id as written, trimmed (rows without one: none);
            // a typed id by its key.
            let key = hist.patient_id(ep.patient);
            let id = match hist.plan.keys.field(key) {
                Field::Text(t) => t.trim_ascii(),
                _ => key,
            };
            group_of.push((!id.is_empty()).then(|| number(&mut group_ids, id)));
        }
        if let Some(c) = cluster_col {
            cluster_raw.push(
                hist.value(e, c)
                    .is_some_and(|(v, _)| label_key(v, &mut label))
                    .then(|| number(&mut cluster_ids, &label)),
            );
        }
        for k in 0..nnum {
            numeric[k].push(row_num[k]);
        }
        for k in 0..ncat {
            let next = levels[k].len() as u32;
            let id = match levels[k].get(&row_cat[k]) {
                Some(&id) => id,
                None => {
                    levels[k].insert(row_cat[k].clone(), next);
                    next
                }
            };
            categorical[k].push(id);
        }
    }
    let n = kept.len();
    units.analysed = n as u64;
    units.events = y.iter().filter(|&&v| v).count() as u64;
    if n == 0 {
        return Err(Error::data(
            None,
            format!(
                "no unit can be analysed: {} of {} have no outcome, {} a missing adjustment value, {} no age",
                units.missing_outcome, units.read, units.missing_adjustment, units.missing_age
            ),
        ));
    }
    units.event_share = units.events as f64 / n as f64;
    if units.events == 0 || units.events == n as u64 {
        return Err(Error::data(
            None,
            format!(
                "outcome '{}' is {} for every one of the {n} analysed units: c-statistics and \
                 models need units with both outcomes",
                opts.outcome,
                if units.events == 0 { 0 } else { 1 }
            ),
        ));
    }

    let mut notes: Vec<String> = Vec::new();
    // Adjustment design columns.
    let mut adjustment: Vec<AdjustmentTerm> = Vec::new();
    let mut design: Vec<Vec<f64>> = Vec::new();
    for k in 0..nnum {
        let col = &numeric[k];
        if col.iter().all(|&v| v == col[0]) {
            notes.push(format!(
                "adjustment column '{}' takes the single value {} on every analysed unit; left out of the models",
                numeric_names[k], col[0]
            ));
            continue;
        }
        adjustment.push(AdjustmentTerm {
            name: numeric_names[k].clone(),
            column: numeric_names[k].clone(),
            kind: "numeric".into(),
            level: None,
            reference: None,
        });
        design.push(std::mem::take(&mut numeric[k]));
    }
    // Restricted cubic splines: the K − 2 nonlinear terms of each, after
    // the linear terms, knots at Harrell's quantiles of the analysed units.
    let mut splines: Vec<Spline> = Vec::new();
    for (col_name, nk) in &opts.splines {
        let Some(pos) = adjustment
            .iter()
            .position(|t| t.kind == "numeric" && t.column == *col_name)
        else {
            notes.push(format!(
                "no spline of '{col_name}': the column takes one value on every analysed unit"
            ));
            continue;
        };
        let values = &design[pos];
        let knots = stats::knots(values, *nk)
            .map_err(|e| Error::data(None, format!("--adjust-spline {col_name}:{nk}: {e}")))?;
        let mut terms = vec![col_name.clone()];
        let mut cols = vec![Vec::with_capacity(n); nk - 2];
        let mut buf = vec![0.0; nk - 2];
        for &v in values {
            stats::spline_terms(v, &knots, &mut buf);
            for (c, b) in cols.iter_mut().zip(&buf) {
                c.push(*b);
            }
        }
        for (j, c) in cols.into_iter().enumerate() {
            let name = format!("{col_name}_spline{}", j + 1);
            adjustment.push(AdjustmentTerm {
                name: name.clone(),
                column: col_name.clone(),
                kind: "spline".into(),
                level: None,
                reference: None,
            });
            terms.push(name);
            design.push(c);
        }
        splines.push(Spline {
            column: col_name.clone(),
            knots,
            quantiles: stats::knot_quantiles(*nk).unwrap_or_default().to_vec(),
            terms,
        });
    }
    for k in 0..ncat {
        let col_name = &opts.adjust_categorical[k];
        // Levels in the byte order of their text; the first is the
        // reference.
        let sorted = labels_in_order(&levels[k]);
        if sorted.len() > MAX_LEVELS {
            return Err(Error::Usage(format!(
                "categorical adjustment column '{col_name}' has {} levels among the analysed \
                 units; at most {MAX_LEVELS} are supported (is it an identifier, or a number \
                 meant for --adjust?)",
                sorted.len()
            )));
        }
        if sorted.len() < 2 {
            notes.push(format!(
                "categorical adjustment column '{col_name}' has a single level ('{}') among the analysed units; left out of the models",
                sorted.first().map(|l| lossy(&l.0)).unwrap_or_default()
            ));
            continue;
        }
        let reference = lossy(&sorted[0].0);
        for (level, id) in &sorted[1..] {
            let id = *id;
            let level = lossy(level);
            adjustment.push(AdjustmentTerm {
                name: format!("{col_name}={level}"),
                column: col_name.clone(),
                kind: "categorical".into(),
                level: Some(level),
                reference: Some(reference.clone()),
            });
            design.push(
                categorical[k]
                    .iter()
                    .map(|&v| if v == id { 1.0 } else { 0.0 })
                    .collect(),
            );
        }
    }
    let adjust_names: Vec<String> = adjustment.iter().map(|t| t.name.clone()).collect();

    let k = slots.len();
    let mut scores: Vec<Vec<f64>> = vec![Vec::with_capacity(n); k];
    let nconditions = engine.conditions();
    let mut condition_counts = vec![0u64; nconditions];
    let mut values: Vec<Value> = Vec::new();
    for &e in &kept {
        let bits = &resolved[e * w..(e + 1) * w];
        engine.values(bits, hist.episodes[e].age(), &mut values);
        for (s, slot) in scores.iter_mut().zip(&slots) {
            let v = match values[slot.column] {
                Value::Score { scaled, .. } => scaled as f64 / SCALE as f64,
                // Unreachable: units without an age were left out above.
                _ => 0.0,
            };
            s.push(v);
        }
        for (wi, &word) in bits.iter().enumerate() {
            let mut word = word;
            while word != 0 {
                let id = wi * 64 + word.trailing_zeros() as usize;
                word &= word - 1;
                if id < nconditions {
                    condition_counts[id] += 1;
                }
            }
        }
    }

    // The heavy numerics, spread over the cores: one task per summary, ROC
    // curve, model and rank correlation, one for the joint DeLong covariance.
    let constant: Vec<bool> = scores
        .iter()
        .map(|s| s.iter().all(|&v| v == s[0]))
        .collect();
    let live: Vec<usize> = (0..k).filter(|&i| !constant[i]).collect();
    let names: Vec<String> = slots
        .iter()
        .map(|slot| {
            let spec = &engine.specs()[slot.spec];
            if slot.with_age {
                format!("{}_age", spec.name)
            } else {
                spec.name.clone()
            }
        })
        .collect();
    // Folds: every analysed unit's fold, from its --id group.
    let fold_of: Option<Vec<u32>> = opts.folds.map(|kf| {
        if group_of.len() != n {
            group_of = vec![None; n];
        }
        folds::assign_folds(&group_of, kf, opts.seed)
    });
    // Clusters: units without a value are clusters of their own.
    let cluster_of: Option<Vec<u32>> = opts.cluster.as_ref().map(|_| {
        let mut next = cluster_ids.len() as u32;
        cluster_raw
            .iter()
            .map(|c| {
                c.unwrap_or_else(|| {
                    next += 1;
                    next - 1
                })
            })
            .collect()
    });
    let clusters = match (&opts.cluster, &cluster_of) {
        (Some(col), Some(of)) => {
            let count = of.iter().max().map_or(0, |&m| m as usize + 1);
            let mut sizes = vec![0usize; count];
            for &c in of {
                sizes[c as usize] += 1;
            }
            let without = cluster_raw.iter().filter(|c| c.is_none()).count();
            if without > 0 {
                notes.push(format!(
                    "{} analysed units have no value in the --cluster column '{col}': each is \
                     taken as a cluster of its own",
                    fmt_count(without as u64)
                ));
            }
            Some(Clusters {
                column: col.clone(),
                clusters: count,
                units_without_cluster: without,
                largest: sizes.iter().copied().max().unwrap_or(0),
            })
        }
        _ => None,
    };
    let want_eta = opts.by.is_some();
    let mut tasks = Vec::new();
    if !design.is_empty() {
        tasks.push(Task::Baseline);
    }
    tasks.extend(live.iter().map(|&i| Task::Model(i)));
    if !live.is_empty() {
        tasks.push(Task::DeLong);
        if cluster_of.is_some() {
            tasks.push(Task::DeLongClustered);
        }
    }
    tasks.extend(live.iter().map(|&i| Task::Ranks(i)));
    tasks.extend(live.iter().map(|&i| Task::Roc(i)));
    tasks.extend((0..k).map(Task::Summary));
    let refs: Vec<&[f64]> = live.iter().map(|&i| scores[i].as_slice()).collect();
    let nfolds = opts.folds.unwrap_or(0);
    let run_task = |t: &Task| match *t {
        Task::Baseline => {
            let cols: Vec<&[f64]> = design.iter().map(Vec::as_slice).collect();
            let (pat, of_unit) = stats::Patterns::group(&y, &cols);
            let fit = stats::logistic_patterns(&pat, &adjust_names, None);
            let robust = match (&fit, &cluster_of) {
                (Ok(f), Some(cl)) => {
                    Some(stats::cluster_robust_covariance(f, &pat, &of_unit, &y, cl))
                }
                _ => None,
            };
            Output::Model(fit, robust)
        }
        Task::Model(i) => {
            // The units grouped by their values of the score and the
            // adjustment terms: every fit below runs on the groups.
            let mut cols: Vec<&[f64]> = Vec::with_capacity(1 + design.len());
            cols.push(&scores[i]);
            cols.extend(design.iter().map(Vec::as_slice));
            let (pat, of_unit) = stats::Patterns::group(&y, &cols);
            let mut terms = vec![names[i].clone()];
            terms.extend(adjust_names.iter().cloned());
            let fit = stats::logistic_patterns(&pat, &terms, None);
            let Ok(full) = &fit else {
                return Output::Fitted(fit, None, None, None);
            };
            let robust = cluster_of
                .as_deref()
                .map(|cl| stats::cluster_robust_covariance(full, &pat, &of_unit, &y, cl));
            let eta = if want_eta {
                full.linear_predictor(&pat.columns)
                    .ok()
                    .map(|e| of_unit.iter().map(|&j| e[j as usize]).collect())
            } else {
                None
            };
            let out_of_fold = fold_of.as_deref().map(|folds| {
                // Per fold, its units and events in each pattern; a fold's
                // model is fitted on the totals less that fold's counts,
                // started from the full-data estimates (the same maximum,
                // fewer Newton iterations).
                let np = pat.len();
                let mut fold_units = vec![0.0; nfolds * np];
                let mut fold_events = vec![0.0; nfolds * np];
                for (u, (&f, &j)) in folds.iter().zip(&of_unit).enumerate() {
                    let at = f as usize * np + j as usize;
                    fold_units[at] += 1.0;
                    if y[u] {
                        fold_events[at] += 1.0;
                    }
                }
                let start: Vec<f64> = full.coefficients.iter().map(|c| c.estimate).collect();
                let mut fold_eta: Vec<Vec<f64>> = Vec::with_capacity(nfolds);
                let mut train = pat.clone();
                for f in 0..nfolds {
                    let range = f * np..(f + 1) * np;
                    for (j, (fu, fe)) in fold_units[range.clone()]
                        .iter()
                        .zip(&fold_events[range])
                        .enumerate()
                    {
                        train.units[j] = pat.units[j] - fu;
                        train.events[j] = pat.events[j] - fe;
                    }
                    let fit = stats::logistic_patterns(&train, &terms, Some(&start))?;
                    fold_eta.push(fit.linear_predictor(&pat.columns)?);
                }
                let eta: Vec<f64> = folds
                    .iter()
                    .zip(&of_unit)
                    .map(|(&f, &j)| fold_eta[f as usize][j as usize])
                    .collect();
                Ok(folds::evaluate(&y, &eta, folds, nfolds))
            });
            Output::Fitted(fit, eta, out_of_fold, robust)
        }
        Task::DeLong => Output::DeLong(stats::delong(&refs, &y)),
        Task::DeLongClustered => Output::DeLong(stats::delong_clustered(
            &refs,
            &y,
            cluster_of.as_deref().unwrap_or_default(),
        )),
        Task::Ranks(i) => Output::Ranks(stats::average_ranks(&scores[i])),
        Task::Roc(i) => Output::Roc(stats::roc_curve(&scores[i], &y)),
        Task::Summary(i) => Output::Summary(stats::Summary::of(&scores[i])),
    };
    let outputs = par_map(&tasks, cfg.threads, run_task);
    let mut baseline = None;
    let mut baseline_robust = None;
    let mut robusts: Vec<Option<Result<stats::ClusterCovariance, StatsError>>> = vec![None; k];
    let mut clustered_result = None;
    let mut models: Vec<Option<Result<stats::LogisticFit, StatsError>>> = vec![None; k];
    let mut etas: Vec<Option<Vec<f64>>> = vec![None; k];
    let mut fold_etas: Vec<Option<Result<OutOfSample, StatsError>>> = vec![None; k];
    let mut joint_result = None;
    let mut ranks: Vec<Option<Result<Vec<f64>, StatsError>>> = vec![None; k];
    let mut rocs: Vec<Option<RocResult>> = vec![None; k];
    let mut sums: Vec<Option<stats::Summary>> = vec![None; k];
    for (t, o) in tasks.iter().zip(outputs) {
        match (*t, o) {
            (Task::Baseline, Output::Model(m, r)) => {
                baseline = Some(m);
                baseline_robust = r;
            }
            (Task::Model(i), Output::Fitted(m, e, f, r)) => {
                models[i] = Some(m);
                etas[i] = e;
                fold_etas[i] = f;
                robusts[i] = r;
            }
            (Task::DeLong, Output::DeLong(d)) => joint_result = Some(d),
            (Task::DeLongClustered, Output::DeLong(d)) => clustered_result = Some(d),
            (Task::Ranks(i), Output::Ranks(r)) => ranks[i] = Some(r),
            (Task::Roc(i), Output::Roc(r)) => rocs[i] = Some(r),
            (Task::Summary(i), Output::Summary(r)) => {
                sums[i] = Some(r.map_err(|e| Error::data(None, e.to_string()))?)
            }
            _ => {}
        }
    }

    let mut indices: Vec<IndexResult> = Vec::with_capacity(k);
    for (si, slot) in slots.iter().enumerate() {
        let spec = &engine.specs()[slot.spec];
        let sel = &engine.lists()[spec.list];
        let list = &sel.list;
        let weighting = &list.weightings[spec.weighting];
        let Some(sum) = sums[si].take() else {
            return Err(Error::data(
                None,
                "internal error: a summary was not computed",
            ));
        };
        let mut inotes = Vec::new();
        if constant[si] {
            inotes.push(format!(
                "every analysed unit scores {}: the index has zero variance, so it cannot \
                 discriminate; no c-statistic, ROC curve, model or comparison is given",
                fmt_num(sum.min)
            ));
        }
        let roc: Vec<[f64; 2]> = match rocs[si].take() {
            Some(Ok(c)) => c.into_iter().map(|(a, b)| [a, b]).collect(),
            Some(Err(e)) => {
                inotes.push(format!("no ROC curve: {e}"));
                Vec::new()
            }
            None => Vec::new(),
        };
        // The ROC curve has a point per distinct score, after (0, 0).
        let distinct = if constant[si] {
            1
        } else {
            roc.len().saturating_sub(1)
        };
        let prevalence = list
            .conditions
            .iter()
            .enumerate()
            .map(|(ci, c)| {
                let count = condition_counts[sel.offset + ci];
                Prevalence {
                    key: c.key.clone(),
                    label: c.label.clone(),
                    count,
                    share: count as f64 / n as f64,
                }
            })
            .collect();
        indices.push(IndexResult {
            name: names[si].clone(),
            spec: format!("{}:{}", list.name, weighting.name),
            list: list.name.clone(),
            weighting: weighting.name.clone(),
            label: weighting.label.clone(),
            with_age: slot.with_age,
            histogram: histogram(&scores[si], sum.min, sum.max),
            distribution: Distribution {
                n: sum.n,
                mean: sum.mean,
                sd: sum.sd,
                min: sum.min,
                q1: sum.q1,
                median: sum.median,
                q3: sum.q3,
                max: sum.max,
                zero_share: sum.zero_share,
                distinct,
            },
            prevalence,
            c_statistic: None,
            roc,
            model: None,
            added_value: None,
            out_of_sample: None,
            notes: inotes,
        });
    }

    // c-statistics with DeLong's covariance, over the non-constant indices.
    let joint = match joint_result {
        Some(Ok(d)) => Some(d),
        Some(Err(e)) => {
            notes.push(format!(
                "no DeLong variance: {e}; c-statistics are given without confidence intervals and indices are not tested against each other"
            ));
            None
        }
        None => None,
    };
    let clustered = match clustered_result {
        Some(Ok(d)) => Some(d),
        Some(Err(e)) => {
            notes.push(format!(
                "no clustered c-statistic variance: {e}; intervals and tests allowing for \
                 the clusters are not given"
            ));
            None
        }
        None => None,
    };
    for (j, &i) in live.iter().enumerate() {
        let r = &mut indices[i];
        let (cluster_std_error, cluster_ci95) = match &clustered {
            Some(c) => (
                Some(c.covariance[j][j].max(0.0).sqrt()),
                Some([c.ci95[j].0, c.ci95[j].1]),
            ),
            None => (None, None),
        };
        match &joint {
            Some(d) => {
                let se = d.covariance[j][j].max(0.0).sqrt();
                if d.aucs[j] == 1.0 || d.aucs[j] == 0.0 {
                    r.notes.push(format!(
                        "the score separates the outcomes perfectly (c-statistic {}): the DeLong \
                         standard error is 0 and the interval degenerates to a point",
                        d.aucs[j]
                    ));
                }
                r.c_statistic = Some(CStatistic {
                    estimate: d.aucs[j],
                    std_error: Some(se),
                    ci95: Some([d.ci95[j].0, d.ci95[j].1]),
                    cluster_std_error,
                    cluster_ci95,
                });
            }
            None => match stats::auc(&scores[i], &y) {
                Ok(c) => {
                    r.c_statistic = Some(CStatistic {
                        estimate: c,
                        std_error: None,
                        ci95: None,
                        cluster_std_error: None,
                        cluster_ci95: None,
                    })
                }
                Err(e) => r.notes.push(format!("no c-statistic: {e}")),
            },
        }
    }

    // Models.
    let mut adjustment_model = None;
    let mut adjustment_notes = Vec::new();
    let mut base_ll: Option<(f64, &str)> = None;
    match baseline {
        Some(Ok(f)) => {
            base_ll = Some((f.log_likelihood, "adjustment"));
            adjustment_model = Some(model_of(
                &f,
                robust_or_note(baseline_robust, &mut adjustment_notes),
            ))
        }
        Some(Err(e)) => adjustment_notes.push(model_note(&e)),
        None => {}
    }
    let mut fitted: Vec<bool> = vec![false; k];
    for (i, (m, robust)) in models.into_iter().zip(robusts).enumerate() {
        match m {
            Some(Ok(f)) => {
                fitted[i] = true;
                // Without adjustment terms the baseline is the intercept alone.
                let base = if design.is_empty() {
                    Some((f.null_log_likelihood, "intercept"))
                } else {
                    base_ll
                };
                if let Some((ll0, versus)) = base {
                    let statistic = (2.0 * (f.log_likelihood - ll0)).max(0.0);
                    if let Ok(p) = stats::chi_square_sf(statistic, 1.0) {
                        indices[i].added_value = Some(AddedValue {
                            statistic,
                            df: 1,
                            p_value: p,
                            versus: versus.into(),
                        });
                    }
                }
                let robust = robust_or_note(robust, &mut indices[i].notes);
                indices[i].model = Some(model_of(&f, robust))
            }
            Some(Err(e)) => indices[i].notes.push(model_note(&e)),
            None => {}
        }
    }

    // Out-of-sample figures.
    let cross_validation = match (&fold_of, opts.folds) {
        (Some(fo), Some(kf)) => {
            for (i, result) in fold_etas.into_iter().enumerate() {
                match result {
                    None => {}
                    Some(Err(e)) => indices[i].notes.push(format!(
                        "no cross-validated figures: a fold's model failed: {e}"
                    )),
                    Some(Ok(oos)) => indices[i].out_of_sample = Some(oos),
                }
            }
            let mut fold_units = vec![0usize; kf];
            for &f in fo {
                fold_units[f as usize] += 1;
            }
            if fold_units.contains(&0) {
                notes.push(format!(
                    "some of the {kf} folds are empty: there are fewer --id groups than folds"
                ));
            }
            if cfg.id.is_none() {
                notes.push(
                    "--folds without --id: each unit is dealt to a fold on its own, so a \
                     patient's episodes may be split between folds"
                        .into(),
                );
            }
            Some(CrossValidation {
                folds: kf,
                seed: opts.seed,
                grouped_by: cfg.id.clone(),
                fold_units,
            })
        }
        _ => None,
    };

    // Which pairs: all, or the reference against each other index.
    let reference = match &opts.reference {
        None => None,
        Some(r) => {
            let r = r.trim();
            match indices.iter().position(|ix| ix.name == r || ix.spec == r) {
                Some(i) => Some(i),
                None => {
                    return Err(Error::Usage(format!(
                        "--reference '{r}' is not among the indices compared: {}",
                        indices
                            .iter()
                            .map(|ix| ix.name.as_str())
                            .collect::<Vec<_>>()
                            .join(", ")
                    )))
                }
            }
        }
    };
    let pair_list: Vec<(usize, usize)> = match reference {
        None => (0..k)
            .flat_map(|a| (a + 1..k).map(move |b| (a, b)))
            .collect(),
        Some(r) => (0..k).filter(|&b| b != r).map(|b| (r, b)).collect(),
    };
    let pairs_compared = PairsCompared {
        reference: reference.map(|r| indices[r].name.clone()),
        tests: pair_list
            .iter()
            .filter(|&&(a, b)| !constant[a] && !constant[b])
            .count(),
        tests_if_all_pairs: live.len() * live.len().saturating_sub(1) / 2,
    };

    // Providers.
    let providers = opts.by.as_ref().map(|col| {
        // Names in byte order.
        let named = labels_in_order(&provider_ids);
        let mut remap = vec![0u32; named.len()];
        for (pos, (_, id)) in named.iter().enumerate() {
            remap[*id as usize] = pos as u32;
        }
        let of_unit: Vec<Option<u32>> = provider_of
            .iter()
            .map(|p| p.map(|p| remap[p as usize]))
            .collect();
        let fitted_probs: Vec<(String, Option<Vec<f64>>)> = (0..k)
            .map(|i| {
                let probs = etas[i]
                    .take()
                    .filter(|_| fitted[i])
                    .map(|e| e.into_iter().map(|v| 1.0 / (1.0 + (-v).exp())).collect());
                (indices[i].name.clone(), probs)
            })
            .collect();
        providers::providers(
            &providers::ProviderInput {
                column: col.clone(),
                names: named.into_iter().map(|(v, _)| lossy(&v)).collect(),
                of_unit: &of_unit,
                min_expected: opts.min_expected,
                overdispersion: opts.overdispersion,
            },
            &y,
            &fitted_probs,
            &pair_list,
        )
    });

    // Pairs.
    let mut pairs = Vec::new();
    for &(a, b) in &pair_list {
        {
            let mut p = PairResult {
                a: indices[a].name.clone(),
                b: indices[b].name.clone(),
                delong: None,
                spearman: None,
                notes: Vec::new(),
            };
            if constant[a] || constant[b] {
                let which: Vec<&str> = [a, b]
                    .iter()
                    .filter(|&&i| constant[i])
                    .map(|&i| indices[i].name.as_str())
                    .collect();
                p.notes.push(format!(
                    "{} has zero variance: no test or correlation",
                    which.join(" and ")
                ));
                pairs.push(p);
                continue;
            }
            if let Some(d) = &joint {
                let ja = live.iter().position(|&i| i == a).unwrap_or(0);
                let jb = live.iter().position(|&i| i == b).unwrap_or(0);
                match d.compare(ja, jb) {
                    Ok(t) => {
                        let cluster =
                            clustered
                                .as_ref()
                                .and_then(|c| c.compare(ja, jb).ok())
                                .map(|c| ClusteredTest {
                                    std_error: c.std_error,
                                    z: c.z,
                                    p_value: c.p_value,
                                    ci95: [c.ci95.0, c.ci95.1],
                                });
                        p.delong = Some(PairTest {
                            difference: t.difference,
                            std_error: t.std_error,
                            z: t.z,
                            p_value: t.p_value,
                            ci95: [t.ci95.0, t.ci95.1],
                            cluster,
                        })
                    }
                    Err(StatsError::ZeroVariance { .. }) => p.notes.push(
                        "the two scores order the units identically (or the difference is \
                         otherwise deterministic): their c-statistics are equal and the DeLong \
                         test is undefined"
                            .into(),
                    ),
                    Err(e) => p.notes.push(format!("no DeLong test: {e}")),
                }
            }
            match (&ranks[a], &ranks[b]) {
                (Some(Ok(ra)), Some(Ok(rb))) => match pearson_of_ranks(ra, rb) {
                    Some(r) => p.spearman = Some(r),
                    None => p
                        .notes
                        .push("no Spearman correlation: all values tied".into()),
                },
                (Some(Err(e)), _) | (_, Some(Err(e))) => {
                    p.notes.push(format!("no Spearman correlation: {e}"))
                }
                _ => {}
            }
            pairs.push(p);
        }
    }

    if cfg.layout == Layout::Long && cfg.episode.is_none() {
        notes.push(
            "long layout without --episode: each id is one unit (all its codes together)".into(),
        );
    }
    let lookback = crate::pipeline::lookback_text(cfg);
    let window = cfg.uses_history().then(|| cfg.window.name().to_string());
    Ok((
        Comparison {
            format_version: JSON_FORMAT_VERSION,
            morbus_version: crate::VERSION.to_string(),
            outcome: opts.outcome.clone(),
            lookback,
            window,
            hierarchy: engine.options().hierarchy,
            units,
            adjustment,
            splines,
            adjustment_model,
            adjustment_notes,
            indices,
            pairs,
            pairs_compared,
            providers,
            cross_validation,
            clusters,
            notes,
            caution: CAUTION.to_string(),
        },
        summary,
    ))
}

type RocResult = Result<Vec<(f64, f64)>, StatsError>;

/// One piece of the numerics.
#[derive(Clone, Copy)]
enum Task {
    /// The model on the adjustment terms alone.
    Baseline,
    /// Index i's model, with its cross-validation fits when asked.
    Model(usize),
    DeLong,
    /// The c-statistics' covariance allowing for clusters (Obuchowski).
    DeLongClustered,
    /// Average ranks of a score (for Spearman's ρ).
    Ranks(usize),
    Roc(usize),
    Summary(usize),
}

type Robust = Option<Result<stats::ClusterCovariance, StatsError>>;

enum Output {
    Model(Result<stats::LogisticFit, StatsError>, Robust),
    /// A model with the linear predictor of every unit (when asked) and the
    /// out-of-fold figures (with `--folds`).
    Fitted(
        Result<stats::LogisticFit, StatsError>,
        Option<Vec<f64>>,
        Option<Result<OutOfSample, StatsError>>,
        Robust,
    ),
    DeLong(Result<stats::DeLongResult, StatsError>),
    Ranks(Result<Vec<f64>, StatsError>),
    Roc(RocResult),
    Summary(Result<stats::Summary, StatsError>),
}

/// `f` over `items` on `threads` threads (0: one per core), items taken in
/// order as the threads free up; results in the order of `items`.
fn par_map<T: Sync, R: Send>(items: &[T], threads: usize, f: impl Fn(&T) -> R + Sync) -> Vec<R> {
    use std::sync::atomic::{AtomicUsize, Ordering};
    let threads = if threads == 0 {
        std::thread::available_parallelism().map_or(1, |n| n.get())
    } else {
        threads
    }
    .min(items.len());
    if threads <= 1 {
        return items.iter().map(f).collect();
    }
    let next = AtomicUsize::new(0);
    let done: Vec<Vec<(usize, R)>> = std::thread::scope(|s| {
        let handles: Vec<_> = (0..threads)
            .map(|_| {
                s.spawn(|| {
                    let mut out = Vec::new();
                    loop {
                        let i = next.fetch_add(1, Ordering::Relaxed);
                        if i >= items.len() {
                            break;
                        }
                        out.push((i, f(&items[i])));
                    }
                    out
                })
            })
            .collect();
        handles
            .into_iter()
            .map(|h| h.join().unwrap_or_else(|e| std::panic::resume_unwind(e)))
            .collect()
    });
    let mut slots: Vec<Option<R>> = (0..items.len()).map(|_| None).collect();
    for (i, r) in done.into_iter().flatten() {
        slots[i] = Some(r);
    }
    slots.into_iter().flatten().collect()
}

/// Spearman's ρ from the average ranks of two scores
/// ([`stats::average_ranks`]): their Pearson correlation, computed as
/// [`stats::spearman`] does (the mean rank is exactly (n + 1)/2), so that
/// each score is ranked once rather than once per pair. `None` when every
/// value of a score is tied.
fn pearson_of_ranks(ra: &[f64], rb: &[f64]) -> Option<f64> {
    let mid = (ra.len() + 1) as f64 / 2.0;
    let (mut sab, mut saa, mut sbb) = (0.0, 0.0, 0.0);
    for (&x, &y) in ra.iter().zip(rb) {
        let (dx, dy) = (x - mid, y - mid);
        sab += dx * dy;
        saa += dx * dx;
        sbb += dy * dy;
    }
    (saa > 0.0 && sbb > 0.0).then(|| (sab / (saa * sbb).sqrt()).clamp(-1.0, 1.0))
}

fn model_note(e: &StatsError) -> String {
    match e {
        StatsError::Separation { .. } => format!(
            "no logistic model: {e}. The outcome is (almost) perfectly predicted by the \
             score and adjustment terms, so the coefficients diverge; the c-statistic and \
             prevalence still describe the index"
        ),
        _ => format!("no logistic model: {e}"),
    }
}

/// The cluster-robust covariance, or `None` with a note saying why not.
fn robust_or_note(
    r: Option<Result<stats::ClusterCovariance, StatsError>>,
    notes: &mut Vec<String>,
) -> Option<stats::ClusterCovariance> {
    match r {
        Some(Ok(c)) => Some(c),
        Some(Err(e)) => {
            notes.push(format!("no cluster-robust standard errors: {e}"));
            None
        }
        None => None,
    }
}

fn model_of(f: &stats::LogisticFit, robust: Option<stats::ClusterCovariance>) -> Model {
    let robust_se = robust.as_ref().map(|r| r.std_errors());
    Model {
        terms: f
            .coefficients
            .iter()
            .enumerate()
            .map(|(a, c)| {
                let se = robust_se.as_ref().map(|s| s[a]).filter(|s| *s > 0.0);
                let z = se.map(|s| c.estimate / s);
                Term {
                    name: c.name.clone(),
                    estimate: c.estimate,
                    std_error: c.std_error,
                    z: c.z,
                    p_value: c.p_value,
                    odds_ratio: Some(c.estimate.exp()).filter(|v| v.is_finite()),
                    cluster_std_error: se,
                    cluster_z: z,
                    cluster_p_value: z.map(stats::two_sided_p),
                }
            })
            .collect(),
        c_statistic: f.c_statistic,
        aic: f.aic,
        log_likelihood: f.log_likelihood,
        n: f.n,
        events: f.n_events,
        iterations: f.iterations,
    }
}

/// A round bin width near `raw`: 1, 2, 2.5 or 5 times a power of ten.
fn nice_width(raw: f64) -> f64 {
    if raw <= 0.0 || !raw.is_finite() {
        return 1.0;
    }
    let p = 10f64.powf(raw.log10().floor());
    for m in [1.0, 2.0, 2.5, 5.0, 10.0] {
        if m * p >= raw {
            return m * p;
        }
    }
    10.0 * p
}

/// A bin edge without rounding noise (0.30000000000000004 → 0.3).
fn tidy(v: f64) -> f64 {
    (v * 1e9).round() / 1e9
}

/// Histogram of the scores: one bin per whole point when the scores are
/// whole numbers spanning at most 40 points, otherwise about 30 bins of a
/// round width.
fn histogram(s: &[f64], min: f64, max: f64) -> Vec<Bin> {
    let integers = s.iter().all(|v| v.fract() == 0.0);
    let width = if integers && max - min <= 40.0 {
        1.0
    } else {
        nice_width((max - min) / 30.0)
    };
    let start = (min / width).floor() * width;
    let nbins = (((max - start) / width).floor() as usize + 1).clamp(1, 1000);
    let mut counts = vec![0u64; nbins];
    for &v in s {
        let b = (((v - start) / width).floor() as usize).min(nbins - 1);
        counts[b] += 1;
    }
    counts
        .into_iter()
        .enumerate()
        .map(|(i, count)| Bin {
            from: tidy(start + i as f64 * width),
            to: tidy(start + (i + 1) as f64 * width),
            count,
        })
        .collect()
}

/// A count with thousands separators: 1,000,000.
pub(crate) fn fmt_count(v: u64) -> String {
    let digits = v.to_string();
    let mut out = String::with_capacity(digits.len() + digits.len() / 3);
    for (i, ch) in digits.chars().enumerate() {
        if i > 0 && (digits.len() - i) % 3 == 0 {
            out.push(',');
        }
        out.push(ch);
    }
    out
}

/// A number for display: up to 4 significant decimals, no trailing zeros.
pub(crate) fn fmt_num(v: f64) -> String {
    let s = format!("{v:.4}");
    let s = s.trim_end_matches('0').trim_end_matches('.');
    if s == "-0" {
        "0".into()
    } else {
        s.to_string()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn histogram_integer_and_fractional() {
        let h = histogram(&[0.0, 1.0, 1.0, 3.0], 0.0, 3.0);
        assert_eq!(h.len(), 4);
        assert_eq!(
            h.iter().map(|b| b.count).collect::<Vec<_>>(),
            vec![1, 2, 0, 1]
        );
        let v: Vec<f64> = (0..100).map(|i| i as f64 * 0.7).collect();
        let h = histogram(&v, 0.0, 69.3);
        assert_eq!(h.iter().map(|b| b.count).sum::<u64>(), 100);
        assert!(h.len() <= 31, "{}", h.len());
        assert!(h[0].from <= 0.0 && h.last().unwrap().to > 69.3);
        let h = histogram(&[0.0, 0.1, 0.7, 3.9], 0.0, 3.9);
        assert!(h.iter().any(|b| b.from == 0.6), "{h:?}");
        assert_eq!(h.iter().map(|b| b.count).sum::<u64>(), 4);
    }

    #[test]
    fn missing_and_numbers() {
        for m in ["", "NA", "na", "N/A", "N/K", "nk", "NULL", "."] {
            assert!(is_missing(m.as_bytes()), "{m}");
        }
        assert!(!is_missing(b"0"));
        assert_eq!(parse_number(b"72.5"), Some(72.5));
        assert_eq!(parse_number(b"-1e2"), Some(-100.0));
        assert_eq!(parse_number(b"inf"), None);
        assert_eq!(parse_number(b"NaN"), None);
        assert_eq!(parse_number(b"seventy"), None);
    }

    /// A typed value, its text form, and what both read as.
    type Case<T> = (Field<'static>, &'static [u8], Result<Option<T>, ()>);

    #[test]
    fn typed_values_read_as_their_text() {
        use Field::*;
        // Each typed value beside its text form: the same reading.
        let outcomes: [Case<bool>; 10] = [
            (Integer(0), b"0", Ok(Some(false))),
            (Integer(1), b"1", Ok(Some(true))),
            (Number(0.0), b"0.0", Ok(Some(false))),
            (Number(1.0), b"1.0", Ok(Some(true))),
            (Logical(true), b"TRUE", Ok(Some(true))),
            (Logical(false), b"false", Ok(Some(false))),
            (Integer(2), b"2", Err(())),
            (Number(0.5), b"0.5", Err(())),
            (Number(f64::NAN), b"NA", Ok(None)),
            (Null, b"", Ok(None)),
        ];
        for (typed, text, expected) in outcomes {
            assert_eq!(read_outcome(typed), expected, "{typed:?}");
            assert_eq!(read_outcome(Text(text)), expected, "{text:?}");
        }
        assert_eq!(read_outcome(Text(b"yes")), Err(()));
        assert_eq!(read_outcome(Date(0)), Err(()));
        assert_eq!(read_outcome(Text(b"1970-01-01")), Err(()));
        let numbers: [Case<f64>; 6] = [
            (Integer(72), b"72", Ok(Some(72.0))),
            (Number(72.5), b"72.5", Ok(Some(72.5))),
            (Logical(true), b"true", Ok(Some(1.0))),
            (Number(f64::INFINITY), b"inf", Err(())),
            (Date(0), b"1970-01-01", Err(())),
            (Number(f64::NAN), b"N/K", Ok(None)),
        ];
        for (typed, text, expected) in numbers {
            assert_eq!(read_number(typed), expected, "{typed:?}");
            assert_eq!(read_number(Text(text)), expected, "{text:?}");
        }
        // A typed level is told apart by its value and shown as its text
        // form; a text level as written.
        let key = |f| {
            let mut k = Vec::new();
            label_key(f, &mut k).then_some(k)
        };
        for (typed, text) in [
            (Integer(3), &b"3"[..]),
            (Number(2.5), b"2.5"),
            (Number(3.0), b"3"),
            (Number(-0.0), b"0"),
            (Logical(true), b"true"),
            (Date(0), b"1970-01-01"),
        ] {
            let k = key(typed).unwrap();
            assert_eq!(label_text(&k), text, "{typed:?}");
            assert_eq!(label_text(&key(Text(text)).unwrap()), text);
        }
        assert_eq!(key(Number(-0.0)), key(Number(0.0)));
        assert_ne!(key(Integer(3)), key(Integer(4)));
        assert_eq!(key(Text(b" ")).map(|k| label_text(&k)), Some(b" ".to_vec()));
        assert_eq!(key(Text(b"NULL")), None);
        assert_eq!(key(Number(f64::NAN)), None);
        assert_eq!(key(Null), None);
    }

    #[test]
    fn spearman_from_ranks_is_the_library_spearman() {
        let a = [3.0, 1.0, 4.0, 1.0, 5.0, 9.0, 2.0, 6.0, 5.0, 3.0];
        let b = [2.0, 7.0, 1.0, 8.0, 2.0, 8.0, 1.0, 8.0, 2.0, 8.0];
        let ra = stats::average_ranks(&a).unwrap();
        let rb = stats::average_ranks(&b).unwrap();
        let rho = pearson_of_ranks(&ra, &rb).unwrap();
        assert_eq!(rho, stats::spearman(&a, &b).unwrap());
        assert_eq!(pearson_of_ranks(&ra, &[5.5; 10]), None);
    }

    #[test]
    fn number_display() {
        assert_eq!(fmt_num(1.0), "1");
        assert_eq!(fmt_count(0), "0");
        assert_eq!(fmt_count(999), "999");
        assert_eq!(fmt_count(1000), "1,000");
        assert_eq!(fmt_count(1234567), "1,234,567");
        assert_eq!(fmt_num(0.12345), "0.1235");
        assert_eq!(fmt_num(-0.00001), "0");
        assert_eq!(nice_width(0.37), 0.5);
        assert_eq!(nice_width(2.1), 2.5);
    }
}
