//! Maximum-likelihood logistic regression by Newton–Raphson (equivalently
//! iteratively reweighted least squares; Nelder & Wedderburn, J R Stat Soc A
//! 1972;135:370-84), with Wald standard errors from the inverse Fisher
//! information.

use super::linalg::Cholesky;
use super::normal::two_sided_p;
use super::{check_finite, check_len, count_outcome, StatsError};

/// Name given to the intercept in [`LogisticFit::coefficients`].
pub const INTERCEPT_NAME: &str = "(Intercept)";

/// Maximum number of Newton–Raphson iterations.
const MAX_ITER: usize = 50;
/// Convergence: largest Newton step on the standardised coefficients.
const STEP_TOL: f64 = 1e-9;
/// Relative pivot below which the design is declared collinear
/// (1 − R² of a predictor on the intercept and earlier predictors).
const COLLINEAR_TOL: f64 = 1e-10;
/// Relative pivot below which the weighted information matrix is declared
/// singular during the iterations (the design itself being of full rank).
const INFO_TOL: f64 = 1e-12;
/// |linear predictor| beyond which a fitted probability is numerically 0 or
/// 1 (1/(1 + e^{30}) ≈ 9e-14).
const EXTREME_ETA: f64 = 30.0;

/// One estimated coefficient with its Wald statistics.
#[derive(Debug, Clone, PartialEq)]
pub struct Coefficient {
    /// Predictor name ([`INTERCEPT_NAME`] for the intercept).
    pub name: String,
    /// Maximum-likelihood estimate (log odds ratio per unit of the predictor).
    pub estimate: f64,
    /// Standard error: square root of the diagonal of the inverse Fisher
    /// information at the estimate.
    pub std_error: f64,
    /// Wald z = estimate / std_error.
    pub z: f64,
    /// Two-sided p-value of z against the standard normal.
    pub p_value: f64,
}

/// Result of [`logistic`].
#[derive(Debug, Clone, PartialEq)]
pub struct LogisticFit {
    /// Intercept first, then the predictors in input order.
    pub coefficients: Vec<Coefficient>,
    /// Covariance matrix of the estimates (inverse Fisher information), in
    /// the order of `coefficients`.
    pub covariance: Vec<Vec<f64>>,
    /// Maximised log-likelihood.
    pub log_likelihood: f64,
    /// Log-likelihood of the intercept-only model.
    pub null_log_likelihood: f64,
    /// Akaike information criterion, −2 log L + 2 (p + 1).
    pub aic: f64,
    /// Bayesian information criterion, −2 log L + (p + 1) ln n.
    pub bic: f64,
    /// Newton–Raphson iterations performed.
    pub iterations: usize,
    /// c-statistic (AUC) of the fitted linear predictor.
    pub c_statistic: f64,
    /// Number of units.
    pub n: usize,
    /// Number of units with outcome `true`.
    pub n_events: usize,
}

impl LogisticFit {
    /// The coefficient called `name`, if any.
    pub fn coefficient(&self, name: &str) -> Option<&Coefficient> {
        self.coefficients.iter().find(|c| c.name == name)
    }

    /// McFadden's pseudo-R², 1 − log L / log L₀ (McFadden 1974, in
    /// Zarembka (ed.), *Frontiers in Econometrics*, 105-42).
    pub fn mcfadden_r2(&self) -> f64 {
        1.0 - self.log_likelihood / self.null_log_likelihood
    }

    /// Linear predictor β₀ + Σ βⱼ xⱼ for new data given as columns in the
    /// order used for fitting. (For an intercept-only fit there are no
    /// columns to take the number of units from, and the result is empty.)
    ///
    /// # Errors
    /// [`StatsError::LengthMismatch`] if the number of columns differs from
    /// the fit or the columns differ in length; [`StatsError::NonFinite`]
    /// for a NaN/infinite value.
    pub fn linear_predictor(&self, x: &[Vec<f64>]) -> Result<Vec<f64>, StatsError> {
        check_len("predictor columns", self.coefficients.len() - 1, x.len())?;
        let n = x.first().map_or(0, Vec::len);
        for (col, coef) in x.iter().zip(&self.coefficients[1..]) {
            let what = format!("predictor '{}'", coef.name);
            check_len(&what, n, col.len())?;
            check_finite(&what, col)?;
        }
        let mut eta = vec![self.coefficients[0].estimate; n];
        for (col, coef) in x.iter().zip(&self.coefficients[1..]) {
            for (e, v) in eta.iter_mut().zip(col) {
                *e += coef.estimate * v;
            }
        }
        Ok(eta)
    }
}

/// Units grouped by their predictor values ("covariate patterns"), with
/// the number of units and of events in each. The likelihood of a logistic
/// model depends on the data only through these counts, so a fit on the
/// patterns is the fit on the units: the same estimates, likelihood and
/// information, at a cost proportional to the number of patterns (a few
/// thousand for integer scores, ages and a few categories, whatever the
/// number of units).
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Patterns {
    /// Predictor columns, one value per pattern.
    pub columns: Vec<Vec<f64>>,
    /// Units per pattern.
    pub units: Vec<f64>,
    /// Units with outcome `true` per pattern.
    pub events: Vec<f64>,
}

/// A fast hasher for rows of `u64` words (multiply and rotate, as in the
/// hash of the Firefox and rustc hash maps); not for untrusted keys, which
/// only slow it down.
#[derive(Default, Clone, Copy)]
struct RowHasher(u64);

impl RowHasher {
    #[inline]
    fn add(&mut self, v: u64) {
        self.0 = (self.0.rotate_left(5) ^ v).wrapping_mul(0x517c_c1b7_2722_0a95);
    }
}

impl std::hash::Hasher for RowHasher {
    fn finish(&self) -> u64 {
        self.0
    }
    fn write(&mut self, bytes: &[u8]) {
        for chunk in bytes.chunks(8) {
            let mut b = [0u8; 8];
            b[..chunk.len()].copy_from_slice(chunk);
            self.add(u64::from_le_bytes(b));
        }
    }
    fn write_u64(&mut self, v: u64) {
        self.add(v);
    }
    fn write_usize(&mut self, v: usize) {
        self.add(v as u64);
    }
}

/// A hash map keyed by rows of words, with [`RowHasher`].
type RowMap<K, V> = std::collections::HashMap<K, V, std::hash::BuildHasherDefault<RowHasher>>;

/// The bits of a value, with −0 read as +0 (they give the same predictions).
#[inline]
fn value_bits(v: f64) -> u64 {
    if v == 0.0 {
        0
    } else {
        v.to_bits()
    }
}

impl Patterns {
    /// Groups units by their row of predictor values (`x` as columns, each
    /// of length `y.len()`); patterns are numbered in order of first
    /// appearance. Returns the patterns and the pattern of every unit.
    /// Lengths are not checked here (see [`logistic_patterns`]).
    pub fn group(y: &[bool], x: &[&[f64]]) -> (Patterns, Vec<u32>) {
        let p = x.len();
        let mut map: RowMap<Box<[u64]>, u32> = RowMap::default();
        let mut key = vec![0u64; p];
        let mut out = Patterns {
            columns: vec![Vec::new(); p],
            units: Vec::new(),
            events: Vec::new(),
        };
        let mut of_unit = Vec::with_capacity(y.len());
        for (i, &yi) in y.iter().enumerate() {
            for (k, col) in key.iter_mut().zip(x) {
                *k = value_bits(col[i]);
            }
            let id = match map.get(&key[..]) {
                Some(&id) => id,
                None => {
                    let id = out.units.len() as u32;
                    map.insert(key.clone().into_boxed_slice(), id);
                    for (c, col) in out.columns.iter_mut().zip(x) {
                        c.push(col[i]);
                    }
                    out.units.push(0.0);
                    out.events.push(0.0);
                    id
                }
            };
            out.units[id as usize] += 1.0;
            if yi {
                out.events[id as usize] += 1.0;
            }
            of_unit.push(id);
        }
        (out, of_unit)
    }

    /// Number of patterns.
    pub fn len(&self) -> usize {
        self.units.len()
    }

    /// Whether there are no patterns.
    pub fn is_empty(&self) -> bool {
        self.units.is_empty()
    }

    /// The same patterns with those of no units left out.
    fn compact(&self) -> Patterns {
        let keep: Vec<usize> = (0..self.len()).filter(|&j| self.units[j] > 0.0).collect();
        Patterns {
            columns: self
                .columns
                .iter()
                .map(|c| keep.iter().map(|&j| c[j]).collect())
                .collect(),
            units: keep.iter().map(|&j| self.units[j]).collect(),
            events: keep.iter().map(|&j| self.events[j]).collect(),
        }
    }
}

/// Patterns with their predictors centred and scaled to unit (population,
/// unit-weighted) SD; the model is fitted on this scale for conditioning
/// and transformed back.
struct Design {
    /// Standardised rows, row-major, `p` values per pattern.
    z: Vec<f64>,
    p: usize,
    units: Vec<f64>,
    events: Vec<f64>,
    mean: Vec<f64>,
    inv_sd: Vec<f64>,
}

impl Design {
    /// Number of parameters including the intercept.
    fn dim(&self) -> usize {
        self.p + 1
    }

    #[inline]
    fn row(&self, j: usize) -> &[f64] {
        &self.z[j * self.p..(j + 1) * self.p]
    }

    #[inline]
    fn eta(b: &[f64], row: &[f64]) -> f64 {
        b[0] + b[1..].iter().zip(row).map(|(c, z)| c * z).sum::<f64>()
    }

    /// Log-likelihood, score vector and Fisher information (row-major).
    fn evaluate(&self, b: &[f64]) -> (f64, Vec<f64>, Vec<f64>) {
        let d = self.dim();
        let mut row = vec![1.0; d];
        let mut ll = 0.0;
        let mut grad = vec![0.0; d];
        let mut info = vec![0.0; d * d];
        for j in 0..self.units.len() {
            row[1..].copy_from_slice(self.row(j));
            let eta = Self::eta(b, &row[1..]);
            let (w, k) = (self.units[j], self.events[j]);
            let e = (-eta.abs()).exp();
            let (p, q) = probabilities_from(eta, e);
            ll += k * eta - w * (eta.max(0.0) + e.ln_1p());
            let resid = k - w * p;
            let wt = w * p * q;
            for a in 0..d {
                grad[a] += resid * row[a];
                let wa = wt * row[a];
                for c in 0..=a {
                    info[a * d + c] += wa * row[c];
                }
            }
        }
        for a in 0..d {
            for c in 0..a {
                info[c * d + a] = info[a * d + c];
            }
        }
        (ll, grad, info)
    }

    /// Linear predictor on the standardised scale for every pattern.
    fn linear_predictor(&self, b: &[f64]) -> Vec<f64> {
        (0..self.units.len())
            .map(|j| Self::eta(b, self.row(j)))
            .collect()
    }
}

/// Cluster-robust ("sandwich") covariance of the estimates of a logistic
/// fit, and what it was computed from. Returned by
/// [`cluster_robust_covariance`].
#[derive(Debug, Clone, PartialEq)]
pub struct ClusterCovariance {
    /// In the order of [`LogisticFit::coefficients`].
    pub covariance: Vec<Vec<f64>>,
    /// Number of clusters G.
    pub clusters: usize,
    /// The small-sample factor applied, G/(G − 1) · (N − 1)/(N − K).
    pub factor: f64,
}

impl ClusterCovariance {
    /// Standard errors: square roots of the diagonal.
    pub fn std_errors(&self) -> Vec<f64> {
        (0..self.covariance.len())
            .map(|a| self.covariance[a][a].max(0.0).sqrt())
            .collect()
    }
}

/// Cluster-robust covariance of a logistic fit: V (Σ_g s_g s_gᵀ) V · c,
/// with V the model-based covariance (inverse information), s_g the sum
/// over cluster g's units of the score contributions xᵢ (yᵢ − pᵢ) (x with
/// the leading 1 of the intercept), and c = G/(G − 1) · (N − 1)/(N − K)
/// for G clusters, N units and K coefficients: the factor statsmodels
/// applies by default for `cov_type='cluster'` (`use_correction=True`).
/// The units are given as their [`Patterns`] (those the fit was computed
/// from), the pattern of each unit, its outcome and its cluster (any
/// `u32`s).
///
/// # Errors
/// [`StatsError::LengthMismatch`] for lengths that do not agree with the
/// fit or each other; [`StatsError::TooFewObservations`] with fewer than 2
/// clusters, or no more units than coefficients.
pub fn cluster_robust_covariance(
    fit: &LogisticFit,
    patterns: &Patterns,
    of_unit: &[u32],
    y: &[bool],
    cluster: &[u32],
) -> Result<ClusterCovariance, StatsError> {
    let d = fit.coefficients.len();
    check_len("pattern columns", d - 1, patterns.columns.len())?;
    check_len("units' patterns", y.len(), of_unit.len())?;
    check_len("clusters", y.len(), cluster.len())?;
    let np = patterns.len();
    if let Some(&j) = of_unit.iter().find(|&&j| j as usize >= np) {
        return Err(StatsError::InvalidArgument(format!(
            "pattern {j} out of range: {np} patterns"
        )));
    }
    let beta: Vec<f64> = fit.coefficients.iter().map(|c| c.estimate).collect();
    let prob: Vec<f64> = (0..np)
        .map(|j| {
            let eta = beta[0]
                + patterns
                    .columns
                    .iter()
                    .zip(&beta[1..])
                    .map(|(c, b)| c[j] * b)
                    .sum::<f64>();
            probabilities_from(eta, (-eta.abs()).exp()).0
        })
        .collect();
    let mut dense: RowMap<u32, usize> = RowMap::default();
    let mut sums: Vec<f64> = Vec::new();
    for ((&yi, &j), &c) in y.iter().zip(of_unit).zip(cluster) {
        let next = dense.len();
        let g = *dense.entry(c).or_insert(next);
        if g == next {
            sums.resize((g + 1) * d, 0.0);
        }
        let r = f64::from(u8::from(yi)) - prob[j as usize];
        let s = &mut sums[g * d..(g + 1) * d];
        s[0] += r;
        for (k, col) in patterns.columns.iter().enumerate() {
            s[k + 1] += r * col[j as usize];
        }
    }
    let g = dense.len();
    let n = y.len();
    if g < 2 {
        return Err(StatsError::TooFewObservations {
            what: "a cluster-robust covariance (clusters)".into(),
            needed: 2,
            found: g,
        });
    }
    if n <= d {
        return Err(StatsError::TooFewObservations {
            what: "a cluster-robust covariance (units, more than the coefficients)".into(),
            needed: d + 1,
            found: n,
        });
    }
    let mut meat = vec![0.0; d * d];
    for s in sums.chunks_exact(d) {
        for a in 0..d {
            for b in 0..=a {
                meat[a * d + b] += s[a] * s[b];
            }
        }
    }
    for a in 0..d {
        for b in 0..a {
            meat[b * d + a] = meat[a * d + b];
        }
    }
    let (gf, nf, kf) = (g as f64, n as f64, d as f64);
    let factor = gf / (gf - 1.0) * (nf - 1.0) / (nf - kf);
    let v = &fit.covariance;
    // V M, then (V M) V.
    let mut vm = vec![0.0; d * d];
    for a in 0..d {
        for b in 0..d {
            vm[a * d + b] = (0..d).map(|k| v[a][k] * meat[k * d + b]).sum();
        }
    }
    let mut covariance = vec![vec![0.0; d]; d];
    for a in 0..d {
        for b in a..d {
            let x = factor * (0..d).map(|k| vm[a * d + k] * v[k][b]).sum::<f64>();
            covariance[a][b] = x;
            covariance[b][a] = x;
        }
    }
    Ok(ClusterCovariance {
        covariance,
        clusters: g,
        factor,
    })
}

/// Describes parameter `j` (0 = intercept) for messages.
fn param_name(names: &[String], j: usize) -> String {
    match j.checked_sub(1).and_then(|k| names.get(k)) {
        Some(name) => format!("'{name}'"),
        None => "the intercept".to_string(),
    }
}

/// (p, 1 − p) for p = 1/(1 + e^{−η}), each accurate in relative terms,
/// given e = e^{−|η|}.
#[inline]
fn probabilities_from(eta: f64, e: f64) -> (f64, f64) {
    let big = 1.0 / (1.0 + e);
    let small = e / (1.0 + e);
    if eta >= 0.0 {
        (big, small)
    } else {
        (small, big)
    }
}

/// The c-statistic of `eta` from grouped counts: patterns ordered by η,
/// ties (equal η) counting one half, as [`auc`] on the units.
fn grouped_auc(eta: &[f64], units: &[f64], events: &[f64]) -> f64 {
    let mut order: Vec<usize> = (0..eta.len()).collect();
    order.sort_unstable_by(|&a, &b| eta[a].total_cmp(&eta[b]));
    // Counts are whole numbers held exactly; the pair count is summed in
    // integers as `auc` does.
    let (mut twice_u, mut neg_below, mut pos, mut neg) = (0u128, 0u128, 0u128, 0u128);
    let mut i = 0;
    while i < order.len() {
        let v = eta[order[i]];
        let (mut e, mut ne) = (0u128, 0u128);
        while i < order.len() && eta[order[i]] == v {
            let j = order[i];
            e += events[j] as u128;
            ne += (units[j] - events[j]) as u128;
            i += 1;
        }
        twice_u += 2 * e * neg_below + e * ne;
        neg_below += ne;
        pos += e;
        neg += ne;
    }
    twice_u as f64 / (2.0 * pos as f64 * neg as f64)
}

/// Logistic regression of a binary outcome on predictors, with an
/// intercept, by maximum likelihood (Newton–Raphson with step halving).
///
/// `x` holds the predictor *columns* (each of length `y.len()`), without
/// the intercept; `names` names them. The units are grouped by their
/// predictor values ([`Patterns`]) and the model fitted on the groups,
/// which gives the same maximum. Internally the predictors are centred
/// and scaled, and the estimates and their covariance are transformed back
/// to the original scale. Iteration stops when the largest Newton step on
/// the standardised scale is below 1e-9; standard errors are the square
/// roots of the diagonal of the inverse Fisher information at the estimate
/// (Wald). Cost: O(n·p) to group, O(patterns·p²) per iteration.
///
/// # Errors
/// * [`StatsError::LengthMismatch`] if `names` and `x` differ in length or
///   a column's length differs from `y`;
/// * [`StatsError::NonFinite`] for a NaN/infinite predictor value;
/// * [`StatsError::ConstantOutcome`] if `y` is all true or all false;
/// * [`StatsError::ConstantPredictor`] for a predictor with a single value;
/// * [`StatsError::CollinearPredictor`] for a predictor that is (to
///   1 − R² < 1e-10) a linear combination of the intercept and earlier
///   predictors;
/// * [`StatsError::Separation`] when the outcome is perfectly or
///   quasi-completely separated: the information matrix becomes singular
///   as fitted probabilities reach 0 or 1, or the iterations end with
///   coefficients still growing and some fitted probabilities numerically
///   0 or 1 (|η| > 30);
/// * [`StatsError::NotConverged`] if 50 iterations do not suffice otherwise.
///
/// ```
/// use morbus::stats::logistic;
/// let y = [false, false, true, false, true, true, false, true];
/// let age = vec![50.0, 61.0, 70.0, 55.0, 58.0, 80.0, 66.0, 75.0];
/// let fit = logistic(&y, &[age], &["age".to_string()])?;
/// let b = fit.coefficient("age").unwrap();
/// assert!(b.estimate > 0.0 && b.std_error > 0.0);
/// assert_eq!(fit.coefficients[0].name, "(Intercept)");
/// assert!((fit.aic - (-2.0 * fit.log_likelihood + 4.0)).abs() < 1e-12);
/// # Ok::<(), morbus::stats::StatsError>(())
/// ```
pub fn logistic(y: &[bool], x: &[Vec<f64>], names: &[String]) -> Result<LogisticFit, StatsError> {
    logistic_from(y, x, names, None)
}

/// [`logistic`] with Newton–Raphson started at `start` (intercept first,
/// on the scale of the predictors as given, e.g. the estimates of a fit on
/// overlapping data) instead of the intercept-only fit. The maximum found
/// is the same; a near start saves iterations. A start of the wrong length,
/// or one at which the log-likelihood is not finite, is ignored.
///
/// # Errors
/// As [`logistic`].
pub fn logistic_from(
    y: &[bool],
    x: &[Vec<f64>],
    names: &[String],
    start: Option<&[f64]>,
) -> Result<LogisticFit, StatsError> {
    let n = y.len();
    check_len("predictor names", x.len(), names.len())?;
    for (col, name) in x.iter().zip(names) {
        let what = format!("predictor '{name}'");
        check_len(&what, n, col.len())?;
        check_finite(&what, col)?;
    }
    count_outcome(y)?;
    let cols: Vec<&[f64]> = x.iter().map(Vec::as_slice).collect();
    let (patterns, _) = Patterns::group(y, &cols);
    fit(&patterns, names, start)
}

/// [`logistic_from`] on units already grouped into [`Patterns`]
/// (patterns of no units are allowed and ignored, e.g. after leaving a
/// fold's counts out of the totals).
///
/// # Errors
/// As [`logistic`]; also [`StatsError::InvalidArgument`] for a negative or
/// fractional count, or more events than units.
pub fn logistic_patterns(
    patterns: &Patterns,
    names: &[String],
    start: Option<&[f64]>,
) -> Result<LogisticFit, StatsError> {
    let np = patterns.len();
    check_len("predictor names", patterns.columns.len(), names.len())?;
    check_len("pattern events", np, patterns.events.len())?;
    for (col, name) in patterns.columns.iter().zip(names) {
        let what = format!("predictor '{name}'");
        check_len(&what, np, col.len())?;
        check_finite(&what, col)?;
    }
    for (&w, &k) in patterns.units.iter().zip(&patterns.events) {
        if !(w >= 0.0 && k >= 0.0 && k <= w && w.fract() == 0.0 && k.fract() == 0.0) {
            return Err(StatsError::InvalidArgument(format!(
                "pattern counts must be whole numbers with 0 <= events <= units, got {k} of {w}"
            )));
        }
    }
    if patterns.units.contains(&0.0) {
        fit(&patterns.compact(), names, start)
    } else {
        fit(patterns, names, start)
    }
}

/// The fit on patterns of at least one unit each, lengths checked.
fn fit(
    patterns: &Patterns,
    names: &[String],
    start: Option<&[f64]>,
) -> Result<LogisticFit, StatsError> {
    let x = &patterns.columns;
    let np = patterns.len();
    let nf: f64 = patterns.units.iter().sum();
    let n1: f64 = patterns.events.iter().sum();
    let (n, n_events) = (nf as usize, n1 as usize);
    let n_nonevents = n - n_events;
    if n_events == 0 || n_nonevents == 0 {
        return Err(StatsError::ConstantOutcome {
            positives: n_events,
            negatives: n_nonevents,
        });
    }

    // Standardise (unit-weighted), rejecting constant predictors.
    let mut mean = Vec::with_capacity(x.len());
    let mut inv_sd = Vec::with_capacity(x.len());
    for (col, name) in x.iter().zip(names) {
        let (lo, hi) = col
            .iter()
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), &v| {
                (lo.min(v), hi.max(v))
            });
        let w = &patterns.units;
        let m = col.iter().zip(w).map(|(v, w)| v * w).sum::<f64>() / nf;
        let sd = (col
            .iter()
            .zip(w)
            .map(|(v, w)| w * (v - m) * (v - m))
            .sum::<f64>()
            / nf)
            .sqrt();
        if lo == hi || sd == 0.0 {
            return Err(StatsError::ConstantPredictor {
                name: name.clone(),
                value: col[0],
            });
        }
        if !sd.is_finite() {
            return Err(StatsError::InvalidArgument(format!(
                "predictor '{name}' has values too large to standardise"
            )));
        }
        mean.push(m);
        inv_sd.push(1.0 / sd);
    }
    let p = x.len();
    let mut z = vec![0.0; np * p];
    for j in 0..np {
        for k in 0..p {
            z[j * p + k] = (x[k][j] - mean[k]) * inv_sd[k];
        }
    }
    let design = Design {
        z,
        p,
        units: patterns.units.clone(),
        events: patterns.events.clone(),
        mean,
        inv_sd,
    };
    let d = design.dim();

    // Collinearity: Cholesky of the standardised Gram matrix (with intercept).
    {
        let mut gram = vec![0.0; d * d];
        let mut row = vec![1.0; d];
        for j in 0..np {
            row[1..].copy_from_slice(design.row(j));
            let w = design.units[j];
            for a in 0..d {
                for c in 0..=a {
                    gram[a * d + c] += w * row[a] * row[c];
                }
            }
        }
        if let Err(j) = Cholesky::new(&gram, d, COLLINEAR_TOL) {
            // j = 0 (the intercept) cannot fail: its pivot is n > 0.
            return Err(StatsError::CollinearPredictor {
                name: names[j.saturating_sub(1)].clone(),
            });
        }
    }

    // Newton–Raphson from the intercept-only fit, or from `start` moved to
    // the standardised scale (b_j = β_j s_j, b_0 = β_0 + Σ β_j m_j).
    let mut b = vec![0.0; d];
    b[0] = (n_events as f64 / n_nonevents as f64).ln();
    let (mut ll, mut grad, mut info) = design.evaluate(&b);
    if let Some(st) = start.filter(|st| st.len() == d && st.iter().all(|v| v.is_finite())) {
        let mut w = vec![0.0; d];
        w[0] = st[0];
        for j in 1..d {
            w[j] = st[j] / design.inv_sd[j - 1];
            w[0] += st[j] * design.mean[j - 1];
        }
        let (ll_w, grad_w, info_w) = design.evaluate(&w);
        if ll_w.is_finite() && ll_w >= ll {
            (b, ll, grad, info) = (w, ll_w, grad_w, info_w);
        }
    }
    let mut iterations = 0;
    let mut converged = false;
    let mut last_step = vec![0.0; d];
    while iterations < MAX_ITER {
        let chol = Cholesky::new(&info, d, INFO_TOL).map_err(|j| StatsError::Separation {
            detail: format!(
                "the information matrix became singular at iteration {iterations} \
                 (at {}) as fitted probabilities approached 0 or 1",
                param_name(names, j)
            ),
        })?;
        let step = chol.solve(&grad);
        iterations += 1;
        let max_step = step.iter().fold(0.0f64, |acc, s| acc.max(s.abs()));
        last_step.clone_from(&step);
        if !max_step.is_finite() {
            return Err(StatsError::Separation {
                detail: "the Newton step became non-finite".to_string(),
            });
        }
        // Step halving: accept the first fraction that does not lower the
        // log-likelihood (beyond rounding); the score and information come
        // with the likelihood in the same pass.
        let mut t = 1.0;
        let mut accepted = None;
        for _ in 0..30 {
            let cand: Vec<f64> = b.iter().zip(&step).map(|(bi, s)| bi + t * s).collect();
            let (ll_cand, grad_cand, info_cand) = design.evaluate(&cand);
            if ll_cand >= ll - 1e-12 * (1.0 + ll.abs()) {
                accepted = Some((cand, ll_cand, grad_cand, info_cand));
                break;
            }
            t *= 0.5;
        }
        let Some((cand, ll_c, grad_c, info_c)) = accepted else {
            // No step improves the likelihood: numerically at the maximum.
            converged = max_step < 1e-6;
            break;
        };
        (b, ll, grad, info) = (cand, ll_c, grad_c, info_c);
        if t * max_step < STEP_TOL {
            converged = true;
            break;
        }
    }
    let eta = design.linear_predictor(&b);
    let extreme: f64 = eta
        .iter()
        .zip(&design.units)
        .filter(|(e, _)| e.abs() > EXTREME_ETA)
        .map(|(_, w)| w)
        .sum();
    if !converged {
        if extreme > 0.0 {
            // The parameter still moving fastest (standardised scale).
            let fastest = (0..d)
                .max_by(|&a, &c| last_step[a].abs().total_cmp(&last_step[c].abs()))
                .unwrap_or(0);
            return Err(StatsError::Separation {
                detail: format!(
                    "after {iterations} iterations the coefficients are still growing \
                     (fastest: {}) and {extreme} of {n} fitted probabilities are \
                     numerically 0 or 1",
                    param_name(names, fastest)
                ),
            });
        }
        return Err(StatsError::NotConverged { iterations });
    }
    let chol = Cholesky::new(&info, d, INFO_TOL).map_err(|_| StatsError::Separation {
        detail: "the information matrix is singular at the estimate".to_string(),
    })?;
    let cov_std = chol.inverse();

    // Back-transform: β = T b with β₀ = b₀ − Σ bⱼ mⱼ/sⱼ and βⱼ = bⱼ/sⱼ.
    let mut t_mat = vec![0.0; d * d];
    t_mat[0] = 1.0;
    for j in 1..d {
        t_mat[j] = -design.mean[j - 1] * design.inv_sd[j - 1];
        t_mat[j * d + j] = design.inv_sd[j - 1];
    }
    let beta: Vec<f64> = (0..d)
        .map(|a| (0..d).map(|c| t_mat[a * d + c] * b[c]).sum())
        .collect();
    // Cov = T C Tᵀ.
    let mut tc = vec![0.0; d * d];
    for a in 0..d {
        for c in 0..d {
            tc[a * d + c] = (0..d).map(|k| t_mat[a * d + k] * cov_std[k * d + c]).sum();
        }
    }
    // Computed once per pair, so that the matrix is exactly symmetric.
    let mut covariance = vec![vec![0.0; d]; d];
    for a in 0..d {
        for c in a..d {
            let v: f64 = (0..d).map(|k| tc[a * d + k] * t_mat[c * d + k]).sum();
            covariance[a][c] = v;
            covariance[c][a] = v;
        }
    }

    let coefficients = (0..d)
        .map(|a| {
            let std_error = covariance[a][a].max(0.0).sqrt();
            let z = beta[a] / std_error;
            Coefficient {
                name: if a == 0 {
                    INTERCEPT_NAME.to_string()
                } else {
                    names[a - 1].clone()
                },
                estimate: beta[a],
                std_error,
                z,
                p_value: two_sided_p(z),
            }
        })
        .collect::<Vec<_>>();
    if let Some(c) = coefficients
        .iter()
        .find(|c| !(c.std_error > 0.0 && c.z.is_finite()))
    {
        return Err(StatsError::Separation {
            detail: format!(
                "the standard error of '{}' is not positive and finite",
                c.name
            ),
        });
    }

    let (n1, n0, nf) = (n_events as f64, n_nonevents as f64, n as f64);
    let null_log_likelihood = n1 * (n1 / nf).ln() + n0 * (n0 / nf).ln();
    let k = d as f64;
    Ok(LogisticFit {
        coefficients,
        covariance,
        log_likelihood: ll,
        null_log_likelihood,
        aic: -2.0 * ll + 2.0 * k,
        bic: -2.0 * ll + k * nf.ln(),
        iterations,
        c_statistic: grouped_auc(&eta, &design.units, &design.events),
        n,
        n_events,
    })
}

#[cfg(test)]
mod tests {
    use super::super::auc;
    use super::*;
    use approx::assert_relative_eq;

    fn names(v: &[&str]) -> Vec<String> {
        v.iter().map(|s| s.to_string()).collect()
    }

    // Fixed data set, generated once with numpy 2.4.6
    // (default_rng(20240601); age ~ N(68, 12) rounded, male ~ Bernoulli(0.5),
    // cci ~ Poisson(1.5), crp ~ lognormal(2, 0.8) rounded to 0.1, outcome
    // from a logistic model) and pasted here.
    const Y: [u8; 80] = [
        1, 0, 0, 0, 0, 0, 1, 0, 0, 1, 0, 0, 0, 1, 0, 1, 0, 0, 1, 0, 0, 1, 0, 0, 1, 0, 0, 0, 0, 0,
        0, 0, 0, 0, 1, 1, 0, 0, 1, 1, 0, 1, 0, 0, 1, 0, 0, 0, 0, 0, 1, 1, 0, 0, 0, 0, 0, 1, 1, 0,
        0, 0, 1, 1, 1, 0, 1, 0, 1, 0, 1, 0, 1, 0, 0, 1, 0, 0, 0, 1,
    ];
    const AGE: [f64; 80] = [
        76.0, 74.0, 60.0, 54.0, 66.0, 82.0, 84.0, 79.0, 72.0, 87.0, 83.0, 65.0, 55.0, 64.0, 63.0,
        76.0, 45.0, 66.0, 88.0, 57.0, 59.0, 67.0, 51.0, 66.0, 68.0, 68.0, 56.0, 64.0, 76.0, 59.0,
        75.0, 76.0, 51.0, 60.0, 76.0, 74.0, 70.0, 64.0, 69.0, 90.0, 65.0, 75.0, 63.0, 66.0, 76.0,
        57.0, 65.0, 61.0, 58.0, 70.0, 83.0, 71.0, 63.0, 51.0, 78.0, 71.0, 60.0, 78.0, 87.0, 48.0,
        75.0, 78.0, 75.0, 87.0, 76.0, 57.0, 114.0, 70.0, 86.0, 92.0, 79.0, 46.0, 48.0, 60.0, 68.0,
        51.0, 57.0, 63.0, 62.0, 70.0,
    ];
    const MALE: [f64; 80] = [
        1.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 1.0, 1.0, 0.0, 0.0, 0.0, 0.0, 0.0,
        1.0, 0.0, 0.0, 0.0, 0.0, 1.0, 1.0, 0.0, 0.0, 0.0, 0.0, 1.0, 0.0, 1.0, 1.0, 1.0, 1.0, 1.0,
        1.0, 1.0, 1.0, 0.0, 0.0, 0.0, 1.0, 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 0.0, 1.0, 0.0, 0.0, 1.0,
        1.0, 0.0, 1.0, 0.0, 1.0, 0.0, 0.0, 1.0, 0.0, 1.0, 1.0, 1.0, 1.0, 1.0, 0.0, 0.0, 1.0, 0.0,
        1.0, 1.0, 0.0, 1.0, 1.0, 1.0, 0.0, 0.0,
    ];
    const CCI: [f64; 80] = [
        0.0, 1.0, 2.0, 1.0, 1.0, 2.0, 2.0, 1.0, 1.0, 2.0, 2.0, 1.0, 0.0, 3.0, 1.0, 1.0, 0.0, 2.0,
        2.0, 5.0, 0.0, 3.0, 0.0, 2.0, 1.0, 1.0, 1.0, 3.0, 2.0, 2.0, 1.0, 3.0, 2.0, 2.0, 1.0, 3.0,
        1.0, 2.0, 1.0, 1.0, 1.0, 4.0, 1.0, 1.0, 0.0, 0.0, 2.0, 1.0, 1.0, 3.0, 2.0, 4.0, 3.0, 2.0,
        1.0, 1.0, 3.0, 1.0, 1.0, 0.0, 1.0, 2.0, 1.0, 3.0, 4.0, 0.0, 1.0, 2.0, 3.0, 1.0, 1.0, 0.0,
        4.0, 2.0, 2.0, 0.0, 1.0, 2.0, 2.0, 1.0,
    ];
    const CRP: [f64; 80] = [
        21.3, 6.8, 4.5, 20.7, 5.6, 3.1, 7.8, 3.7, 10.6, 4.9, 2.6, 7.5, 4.9, 17.9, 16.4, 4.9, 10.5,
        4.4, 13.2, 11.3, 10.0, 11.1, 3.6, 5.9, 2.2, 2.3, 9.1, 16.8, 14.7, 4.1, 5.3, 4.9, 4.0, 10.4,
        14.8, 19.0, 2.9, 6.2, 23.3, 31.1, 12.9, 15.4, 6.5, 16.1, 4.7, 1.2, 2.7, 6.7, 4.1, 3.8,
        20.5, 18.8, 8.3, 13.5, 2.1, 2.3, 51.6, 5.0, 18.8, 12.8, 18.6, 11.9, 2.3, 7.9, 5.0, 16.8,
        9.4, 10.5, 1.8, 2.5, 5.4, 14.8, 6.9, 4.2, 12.6, 13.5, 9.8, 13.6, 10.8, 13.8,
    ];

    fn dataset() -> (Vec<bool>, Vec<Vec<f64>>, Vec<String>) {
        (
            Y.iter().map(|&v| v == 1).collect(),
            vec![AGE.to_vec(), MALE.to_vec(), CCI.to_vec(), CRP.to_vec()],
            names(&["age", "male", "cci", "crp"]),
        )
    }

    #[test]
    fn matches_statsmodels_logit() {
        let (y, x, nm) = dataset();
        let fit = logistic(&y, &x, &nm).unwrap();
        // reference: statsmodels 0.15.0 Logit(y, add_constant(X))
        // .fit(tol=1e-12) on this data: params, bse, tvalues, pvalues.
        let params = [
            -10.258932845229078,
            0.11750044990178223,
            0.7040634797943802,
            0.2887471555098489,
            0.05027841355223456,
        ];
        let bse = [
            2.448536844826757,
            0.031465511514638084,
            0.5889932238450102,
            0.271180881324656,
            0.035838833992687315,
        ];
        let z = [
            -4.189821716142048,
            3.7342615532285177,
            1.19536770762519,
            1.0647769639931315,
            1.4029031625999202,
        ];
        let p = [
            2.7917371262774908e-05,
            0.00018826676326357794,
            0.23194339666816433,
            0.2869768719592045,
            0.16064571767537772,
        ];
        assert_eq!(fit.coefficients.len(), 5);
        for (k, c) in fit.coefficients.iter().enumerate() {
            assert_relative_eq!(c.estimate, params[k], max_relative = 1e-6);
            assert_relative_eq!(c.std_error, bse[k], max_relative = 1e-6);
            assert_relative_eq!(c.z, z[k], max_relative = 1e-6);
            assert_relative_eq!(c.p_value, p[k], max_relative = 1e-6);
        }
        let got_names: Vec<&str> = fit.coefficients.iter().map(|c| c.name.as_str()).collect();
        assert_eq!(got_names, ["(Intercept)", "age", "male", "cci", "crp"]);
        // reference: statsmodels 0.15.0, same fit: llf, llnull, aic, bic.
        // (statsmodels obtains llnull by fitting the null model iteratively;
        // here it is the closed form, which agrees to about 5e-11.)
        assert_relative_eq!(fit.log_likelihood, -37.91016104236131, max_relative = 1e-6);
        assert_relative_eq!(
            fit.null_log_likelihood,
            -51.14906397628512,
            max_relative = 1e-6
        );
        assert_relative_eq!(fit.aic, 85.82032208472262, max_relative = 1e-6);
        assert_relative_eq!(fit.bic, 97.73045525809202, max_relative = 1e-6);
        // reference: statsmodels 0.15.0 cov_params(), two entries.
        assert_relative_eq!(fit.covariance[0][0], 5.995332680474169, max_relative = 1e-6);
        assert_relative_eq!(
            fit.covariance[2][3],
            0.013205872952076352,
            max_relative = 1e-6
        );
        assert_eq!(fit.covariance[2][3], fit.covariance[3][2]);
        // reference: scikit-learn 1.9.1 roc_auc_score(y, X @ statsmodels params).
        assert_relative_eq!(fit.c_statistic, 0.8190076869322153, max_relative = 1e-12);
        assert_eq!((fit.n, fit.n_events), (80, 27));
        assert!(
            fit.iterations >= 3 && fit.iterations <= 10,
            "{}",
            fit.iterations
        );
        assert_relative_eq!(
            fit.mcfadden_r2(),
            1.0 - 37.91016104236131 / 51.14906397628512,
            max_relative = 1e-6
        );
        // Predictions on the training data reproduce the c-statistic.
        let eta = fit.linear_predictor(&x).unwrap();
        assert_relative_eq!(
            auc(&eta, &y).unwrap(),
            fit.c_statistic,
            max_relative = 1e-12
        );
        assert!(fit.coefficient("cci").is_some() && fit.coefficient("bmi").is_none());
    }

    #[test]
    fn patterns_less_a_subset_fit_the_rest() {
        // The fit on grouped counts with one subset's counts taken away (how
        // compare fits a fold's training data) equals the fit on the units
        // outside the subset; the statsmodels check above covers the
        // grouped fit of all units.
        let (y, x, nm) = dataset();
        let cols: Vec<&[f64]> = x.iter().map(Vec::as_slice).collect();
        let (pat, of_unit) = Patterns::group(&y, &cols);
        assert_eq!(pat.units.iter().sum::<f64>(), 80.0);
        assert_eq!(pat.events.iter().sum::<f64>(), 27.0);
        let held_out = |u: usize| u % 3 == 0;
        let mut train = pat.clone();
        for u in (0..80).filter(|&u| held_out(u)) {
            let j = of_unit[u] as usize;
            train.units[j] -= 1.0;
            if y[u] {
                train.events[j] -= 1.0;
            }
        }
        let grouped = logistic_patterns(&train, &nm, None).unwrap();
        let keep: Vec<usize> = (0..80).filter(|&u| !held_out(u)).collect();
        let ky: Vec<bool> = keep.iter().map(|&u| y[u]).collect();
        let kx: Vec<Vec<f64>> = x
            .iter()
            .map(|c| keep.iter().map(|&u| c[u]).collect())
            .collect();
        let direct = logistic(&ky, &kx, &nm).unwrap();
        for (a, b) in grouped.coefficients.iter().zip(&direct.coefficients) {
            assert_relative_eq!(a.estimate, b.estimate, max_relative = 1e-9);
            assert_relative_eq!(a.std_error, b.std_error, max_relative = 1e-9);
        }
        assert_relative_eq!(
            grouped.log_likelihood,
            direct.log_likelihood,
            max_relative = 1e-12
        );
        assert_eq!(
            grouped.c_statistic,
            auc(&direct.linear_predictor(&kx).unwrap(), &ky).unwrap()
        );
        assert_eq!((grouped.n, grouped.n_events), (direct.n, direct.n_events));
        // Counts that are not whole, or more events than units, are refused.
        let mut bad = pat.clone();
        bad.events[0] = bad.units[0] + 1.0;
        assert!(matches!(
            logistic_patterns(&bad, &nm, None),
            Err(StatsError::InvalidArgument(_))
        ));
    }

    #[test]
    fn cluster_robust_matches_statsmodels() {
        // reference: statsmodels 0.15.0 GLM(y, add_constant(X),
        // family=Binomial()).fit(cov_type='cluster', cov_kwds={'groups': g},
        // tol=1e-12) on this data: bse, and cov_params()[2][3]; g = unit // 4
        // (20 clusters of 4) and g = unit % 7 (7 clusters).
        let (y, x, nm) = dataset();
        let fit = logistic(&y, &x, &nm).unwrap();
        let cols: Vec<&[f64]> = x.iter().map(Vec::as_slice).collect();
        let (pat, of_unit) = Patterns::group(&y, &cols);
        let by4: Vec<u32> = (0..80).map(|u| u / 4).collect();
        let r = cluster_robust_covariance(&fit, &pat, &of_unit, &y, &by4).unwrap();
        let bse = [
            3.072698128409488,
            0.04165135148679745,
            0.5987120208786985,
            0.22570895942570626,
            0.048933377427149975,
        ];
        for (a, b) in r.std_errors().iter().zip(bse) {
            assert_relative_eq!(*a, b, max_relative = 1e-6);
        }
        assert_relative_eq!(
            r.covariance[2][3],
            0.010503602928884468,
            max_relative = 1e-6
        );
        assert_eq!(r.clusters, 20);
        assert_relative_eq!(r.factor, 20.0 / 19.0 * 79.0 / 75.0, max_relative = 1e-15);
        let by7: Vec<u32> = (0..80).map(|u| u % 7).collect();
        let r = cluster_robust_covariance(&fit, &pat, &of_unit, &y, &by7).unwrap();
        let bse = [
            2.4255535361211176,
            0.03184937517720361,
            0.3853064160498432,
            0.2715300458357538,
            0.037228932498721334,
        ];
        for (a, b) in r.std_errors().iter().zip(bse) {
            assert_relative_eq!(*a, b, max_relative = 1e-6);
        }
        assert!(matches!(
            cluster_robust_covariance(&fit, &pat, &of_unit, &y, &[3; 80]),
            Err(StatsError::TooFewObservations { .. })
        ));
    }

    #[test]
    fn intercept_only_closed_form() {
        // Closed form: β₀ = logit(k/n), SE = 1/√(n p̂ (1 − p̂)), log L = log L₀.
        let y: Vec<bool> = (0..40).map(|i| i % 4 == 0).collect(); // 10 of 40
        let fit = logistic(&y, &[], &[]).unwrap();
        let c = &fit.coefficients[0];
        assert_relative_eq!(c.estimate, (10.0f64 / 30.0).ln(), max_relative = 1e-12);
        assert_relative_eq!(
            c.std_error,
            (1.0 / (40.0 * 0.25 * 0.75f64)).sqrt(),
            max_relative = 1e-12
        );
        assert_relative_eq!(
            fit.log_likelihood,
            fit.null_log_likelihood,
            max_relative = 1e-14
        );
        assert_relative_eq!(
            fit.null_log_likelihood,
            10.0 * 0.25f64.ln() + 30.0 * 0.75f64.ln(),
            max_relative = 1e-14
        );
        assert_eq!(fit.c_statistic, 0.5);
    }

    #[test]
    fn binary_predictor_matches_two_by_two_table() {
        // 2×2 table: exposed 12 events / 8 non-events, unexposed 5 / 25.
        // MLE log odds ratio = ln(12·25 / (8·5)); Woolf (Ann Hum Genet
        // 1955;19:251-3) SE = √(1/12 + 1/8 + 1/5 + 1/25); intercept =
        // ln(5/25) with SE √(1/5 + 1/25).
        let mut y = Vec::new();
        let mut x = Vec::new();
        for (exposed, events, non_events) in [(1.0, 12, 8), (0.0, 5, 25)] {
            for i in 0..(events + non_events) {
                y.push(i < events);
                x.push(exposed);
            }
        }
        let fit = logistic(&y, &[x], &names(&["exposed"])).unwrap();
        let b = fit.coefficient("exposed").unwrap();
        assert_relative_eq!(
            b.estimate,
            (12.0f64 * 25.0 / 40.0).ln(),
            max_relative = 1e-10
        );
        assert_relative_eq!(
            b.std_error,
            (1.0 / 12.0 + 1.0 / 8.0 + 1.0 / 5.0 + 1.0f64 / 25.0).sqrt(),
            max_relative = 1e-10
        );
        let b0 = &fit.coefficients[0];
        assert_relative_eq!(b0.estimate, 0.2f64.ln(), max_relative = 1e-10);
        assert_relative_eq!(b0.std_error, (0.2 + 0.04f64).sqrt(), max_relative = 1e-10);
    }

    #[test]
    fn rescaling_a_predictor_rescales_its_coefficient() {
        let (y, mut x, nm) = dataset();
        let base = logistic(&y, &x, &nm).unwrap();
        x[0].iter_mut().for_each(|v| *v = *v * 10.0 + 3.0); // age in other units
        let scaled = logistic(&y, &x, &nm).unwrap();
        assert_relative_eq!(
            scaled.coefficients[1].estimate * 10.0,
            base.coefficients[1].estimate,
            max_relative = 1e-9
        );
        assert_relative_eq!(
            scaled.coefficients[1].std_error * 10.0,
            base.coefficients[1].std_error,
            max_relative = 1e-9
        );
        assert_relative_eq!(
            scaled.coefficients[1].p_value,
            base.coefficients[1].p_value,
            max_relative = 1e-9
        );
        assert_relative_eq!(
            scaled.log_likelihood,
            base.log_likelihood,
            max_relative = 1e-12
        );
        for k in 2..5 {
            assert_relative_eq!(
                scaled.coefficients[k].estimate,
                base.coefficients[k].estimate,
                max_relative = 1e-9
            );
        }
    }

    #[test]
    fn input_errors() {
        let (y, x, nm) = dataset();
        assert_eq!(
            logistic(&y, &x, &nm[..3]),
            Err(StatsError::LengthMismatch {
                what: "predictor names".into(),
                expected: 4,
                found: 3
            })
        );
        let mut short = x.clone();
        short[2].pop();
        assert_eq!(
            logistic(&y, &short, &nm),
            Err(StatsError::LengthMismatch {
                what: "predictor 'cci'".into(),
                expected: 80,
                found: 79
            })
        );
        let mut bad = x.clone();
        bad[3][7] = f64::NAN;
        assert_eq!(
            logistic(&y, &bad, &nm),
            Err(StatsError::NonFinite {
                what: "predictor 'crp'".into(),
                index: 7
            })
        );
        assert_eq!(
            logistic(&[true; 80], &x, &nm),
            Err(StatsError::ConstantOutcome {
                positives: 80,
                negatives: 0
            })
        );
        assert!(matches!(
            logistic(&[], &[], &[]),
            Err(StatsError::ConstantOutcome { .. })
        ));
    }

    #[test]
    fn constant_and_collinear_predictors() {
        let (y, mut x, mut nm) = dataset();
        x.push(vec![0.0; 80]);
        nm.push("hiv".into());
        assert_eq!(
            logistic(&y, &x, &nm),
            Err(StatsError::ConstantPredictor {
                name: "hiv".into(),
                value: 0.0
            })
        );
        // An exact linear combination of earlier predictors.
        x[4] = (0..80).map(|i| 2.0 * CCI[i] - 0.5 * AGE[i] + 1.0).collect();
        nm[4] = "combo".into();
        assert_eq!(
            logistic(&y, &x, &nm),
            Err(StatsError::CollinearPredictor {
                name: "combo".into()
            })
        );
        // A duplicated column.
        x[4] = MALE.to_vec();
        nm[4] = "male again".into();
        assert_eq!(
            logistic(&y, &x, &nm),
            Err(StatsError::CollinearPredictor {
                name: "male again".into()
            })
        );
    }

    #[test]
    fn complete_separation_is_an_error() {
        let x: Vec<f64> = (1..=10).map(f64::from).collect();
        let y: Vec<bool> = x.iter().map(|&v| v > 5.0).collect();
        let e = logistic(&y, &[x], &names(&["x"])).unwrap_err();
        assert!(matches!(e, StatsError::Separation { .. }), "{e:?}");
        assert!(e.to_string().contains("'x'"), "{e}");
    }

    #[test]
    fn quasi_complete_separation_is_an_error() {
        // Outcome 0 below x = 5 and 1 above; both outcomes at x = 5.
        let x = vec![1.0, 2.0, 3.0, 4.0, 5.0, 5.0, 6.0, 7.0, 8.0, 9.0];
        let y = [
            false, false, false, false, false, true, true, true, true, true,
        ];
        let e = logistic(&y, &[x], &names(&["x"])).unwrap_err();
        assert!(matches!(e, StatsError::Separation { .. }), "{e:?}");
    }

    #[test]
    fn rare_indicator_with_only_events_is_an_error() {
        // Typical comorbidity case: an indicator present in 4 units, all of
        // whom have the outcome (quasi-complete separation on one variable),
        // alongside a well-behaved continuous predictor.
        let n = 200;
        let age: Vec<f64> = (0..n).map(|i| 50.0 + f64::from((i * 37) % 41)).collect();
        let ind: Vec<f64> = (0..n).map(|i| f64::from(u8::from(i % 50 == 0))).collect();
        let y: Vec<bool> = (0..n)
            .map(|i| i % 50 == 0 || ((i * 37) % 41 > 20 && i % 3 != 0) || i % 7 == 0)
            .collect();
        let e = logistic(&y, &[age.clone(), ind], &names(&["age", "ind"])).unwrap_err();
        assert!(matches!(e, StatsError::Separation { .. }), "{e:?}");
        assert!(e.to_string().contains("'ind'"), "{e}");
        // Without the indicator the same data fit fine.
        assert!(logistic(&y, &[age], &names(&["age"])).is_ok());
    }
}
