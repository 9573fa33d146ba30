//! DeLong's nonparametric covariance of correlated AUCs, with confidence
//! intervals and the test for a difference between two AUCs.
//!
//! Method: E. R. DeLong, D. M. DeLong & D. L. Clarke-Pearson, "Comparing the
//! areas under two or more correlated receiver operating characteristic
//! curves: a nonparametric approach", *Biometrics* 1988;44:837-45.
//!
//! For score r, with m positive units X₁…X_m and n negative units Y₁…Y_n and
//! the kernel ψ(x, y) = 1 if x > y, ½ if x = y, 0 otherwise, the *placement
//! values* (DeLong's structural components) are
//!
//! * V10ᵣ(Xᵢ) = (1/n) Σⱼ ψ(Xᵢ, Yⱼ) — the share of negatives placed below
//!   positive i,
//! * V01ᵣ(Yⱼ) = (1/m) Σᵢ ψ(Xᵢ, Yⱼ) — the share of positives placed above
//!   negative j,
//!
//! both of which average to the AUC θᵣ. The covariance of the AUC estimates is
//! S = S10/m + S01/n with
//! S10ᵣₛ = Σᵢ (V10ᵣ(Xᵢ) − θᵣ)(V10ₛ(Xᵢ) − θₛ)/(m − 1) and
//! S01ᵣₛ = Σⱼ (V01ᵣ(Yⱼ) − θᵣ)(V01ₛ(Yⱼ) − θₛ)/(n − 1).
//!
//! The placement values are computed by two binary searches per unit in the
//! sorted scores of the other outcome group — the direct placement-value
//! formulation, O((m + n) log(m + n)) per score and equivalent to the midrank
//! algorithm of X. Sun & W. Xu, "Fast implementation of DeLong's algorithm
//! for comparing the areas under correlated receiver operating
//! characteristic curves", *IEEE Signal Processing Letters* 2014;21:1389-93
//! (V10 = (midrank among all − midrank among positives)/n, and so on). Ties
//! are handled exactly.

use super::normal::{normal_quantile, two_sided_p, Z_975};
use super::roc::SortedGroups;
use super::{count_outcome, StatsError};

/// AUCs of k scores measured on the same units, with DeLong's covariance
/// matrix. Returned by [`delong`].
#[derive(Debug, Clone, PartialEq)]
pub struct DeLongResult {
    /// AUC (c-statistic) of each score, in input order.
    pub aucs: Vec<f64>,
    /// k × k DeLong covariance matrix of the AUC estimates
    /// (`covariance[r][s]`); the diagonal holds the variances.
    pub covariance: Vec<Vec<f64>>,
    /// 95% confidence interval of each AUC: normal approximation on the raw
    /// AUC scale, θ ± 1.959964·SE, clipped to [0, 1].
    pub ci95: Vec<(f64, f64)>,
    /// Number of positive units (outcome `true`).
    pub n_positive: usize,
    /// Number of negative units (outcome `false`).
    pub n_negative: usize,
}

/// DeLong test of the difference between two correlated AUCs. Returned by
/// [`DeLongResult::compare`] and [`delong_test`].
#[derive(Debug, Clone, PartialEq)]
pub struct DeLongTest {
    /// AUC of the first score.
    pub auc_a: f64,
    /// AUC of the second score.
    pub auc_b: f64,
    /// `auc_a − auc_b`.
    pub difference: f64,
    /// Standard error of the difference, √(S_aa + S_bb − 2 S_ab).
    pub std_error: f64,
    /// z = difference / std_error.
    pub z: f64,
    /// Two-sided p-value from the standard normal distribution.
    pub p_value: f64,
    /// 95% confidence interval of the difference (normal approximation,
    /// raw scale, clipped to [−1, 1]).
    pub ci95: (f64, f64),
}

impl DeLongResult {
    /// Number of scores compared.
    pub fn len(&self) -> usize {
        self.aucs.len()
    }

    /// Whether there are no scores (never true for a result of [`delong`]).
    pub fn is_empty(&self) -> bool {
        self.aucs.is_empty()
    }

    fn check_index(&self, i: usize) -> Result<(), StatsError> {
        if i < self.aucs.len() {
            Ok(())
        } else {
            Err(StatsError::InvalidArgument(format!(
                "score index {i} out of range: {} score(s) were compared",
                self.aucs.len()
            )))
        }
    }

    /// Standard error of the AUC of score `i`.
    ///
    /// # Errors
    /// [`StatsError::InvalidArgument`] if `i` is out of range.
    pub fn std_error(&self, i: usize) -> Result<f64, StatsError> {
        self.check_index(i)?;
        Ok(self.covariance[i][i].max(0.0).sqrt())
    }

    /// Confidence interval for the AUC of score `i` at the given two-sided
    /// `level` (e.g. 0.9): normal approximation on the raw scale,
    /// θ ± Φ⁻¹((1 + level)/2)·SE, clipped to [0, 1].
    ///
    /// # Errors
    /// [`StatsError::InvalidArgument`] if `i` is out of range or `level` is
    /// not strictly between 0 and 1.
    pub fn ci(&self, i: usize, level: f64) -> Result<(f64, f64), StatsError> {
        self.check_index(i)?;
        if !(level > 0.0 && level < 1.0) {
            return Err(StatsError::InvalidArgument(format!(
                "confidence level must be strictly between 0 and 1, got {level}"
            )));
        }
        let z = normal_quantile(0.5 + level / 2.0)?;
        Ok(clipped_interval(
            self.aucs[i],
            z * self.std_error(i)?,
            0.0,
            1.0,
        ))
    }

    /// DeLong test of AUC(score `a`) − AUC(score `b`), using the covariance
    /// between the two estimates.
    ///
    /// # Errors
    /// * [`StatsError::InvalidArgument`] if an index is out of range or
    ///   `a == b`;
    /// * [`StatsError::ZeroVariance`] if the variance of the difference is
    ///   zero (to rounding), so that z is undefined: this happens when the
    ///   two scores place every unit identically (e.g. one is a monotone
    ///   transform of the other) or, for instance, when one score is perfect
    ///   and the other constant.
    ///
    /// ```
    /// use morbus::stats::delong;
    /// let y = [true, true, true, false, false, false, true, false];
    /// let a = [0.9, 0.8, 0.4, 0.3, 0.35, 0.1, 0.7, 0.6];
    /// let b = [0.7, 0.2, 0.6, 0.5, 0.4, 0.1, 0.8, 0.3];
    /// let t = delong(&[&a, &b], &y)?.compare(0, 1)?;
    /// assert_eq!(t.difference, t.auc_a - t.auc_b);
    /// assert!(t.p_value > 0.0 && t.p_value <= 1.0);
    /// # Ok::<(), morbus::stats::StatsError>(())
    /// ```
    pub fn compare(&self, a: usize, b: usize) -> Result<DeLongTest, StatsError> {
        self.check_index(a)?;
        self.check_index(b)?;
        if a == b {
            return Err(StatsError::InvalidArgument(format!(
                "cannot compare score {a} with itself"
            )));
        }
        let cov = &self.covariance;
        let sum_var = cov[a][a] + cov[b][b];
        let var = sum_var - 2.0 * cov[a][b];
        if var <= 1e-12 * sum_var {
            return Err(StatsError::ZeroVariance {
                what: format!(
                    "the DeLong difference between the AUCs of score {a} and score {b} \
                     (z is undefined: the scores rank the units identically, or the \
                     difference is otherwise deterministic, e.g. one perfect and one constant)"
                ),
            });
        }
        let std_error = var.sqrt();
        let difference = self.aucs[a] - self.aucs[b];
        let z = difference / std_error;
        Ok(DeLongTest {
            auc_a: self.aucs[a],
            auc_b: self.aucs[b],
            difference,
            std_error,
            z,
            p_value: two_sided_p(z),
            ci95: clipped_interval(difference, Z_975 * std_error, -1.0, 1.0),
        })
    }
}

fn clipped_interval(centre: f64, half_width: f64, lo: f64, hi: f64) -> (f64, f64) {
    (
        (centre - half_width).clamp(lo, hi),
        (centre + half_width).clamp(lo, hi),
    )
}

/// AUCs of k correlated scores on the same units with DeLong's covariance
/// matrix and 95% confidence intervals (DeLong, DeLong & Clarke-Pearson,
/// Biometrics 1988;44:837-45; fast computation as in Sun & Xu, IEEE Signal
/// Process Lett 2014;21:1389-93 — see the module documentation).
///
/// `scores[r][u]` is the value of score r for unit u; higher values indicate
/// the positive outcome. Confidence intervals are normal approximations on
/// the raw AUC scale, θ ± 1.959964·SE, clipped to [0, 1] (use
/// [`DeLongResult::ci`] for other levels). Runs in O(k·N log N) time and
/// O(k·N) memory for N units.
///
/// # Errors
/// * [`StatsError::InvalidArgument`] if `scores` is empty;
/// * [`StatsError::LengthMismatch`] / [`StatsError::NonFinite`] for a score
///   (named `"score r"`) of the wrong length or with a NaN/infinite value;
/// * [`StatsError::ConstantOutcome`] if all outcomes are equal;
/// * [`StatsError::TooFewObservations`] with fewer than 2 positives or 2
///   negatives (the variance is undefined).
///
/// ```
/// use morbus::stats::delong;
/// let y = [true, true, true, false, false, false, true, false];
/// let a = [0.9, 0.8, 0.4, 0.3, 0.35, 0.1, 0.7, 0.6];
/// let d = delong(&[&a], &y)?;
/// assert_eq!(d.aucs[0], 0.9375); // 15 of the 16 pairs are ordered correctly
/// let (lo, hi) = d.ci95[0];
/// assert!(lo < 0.9375 && hi == 1.0); // the upper bound is clipped to 1
/// # Ok::<(), morbus::stats::StatsError>(())
/// ```
pub fn delong(scores: &[&[f64]], outcome: &[bool]) -> Result<DeLongResult, StatsError> {
    let pl = Placements::new(scores, outcome)?;
    let k = pl.aucs.len();
    let (mf, nf) = (pl.m as f64, pl.n as f64);
    let (v10, v01) = (&pl.v10, &pl.v01);
    let mut covariance = vec![vec![0.0; k]; k];
    for r in 0..k {
        for s in r..k {
            let s10: f64 = v10[r].iter().zip(&v10[s]).map(|(a, b)| a * b).sum::<f64>() / (mf - 1.0);
            let s01: f64 = v01[r].iter().zip(&v01[s]).map(|(a, b)| a * b).sum::<f64>() / (nf - 1.0);
            let c = s10 / mf + s01 / nf;
            covariance[r][s] = c;
            covariance[s][r] = c;
        }
    }
    Ok(pl.result(covariance))
}

/// [`delong`] for units grouped in clusters (several episodes of one
/// patient, say), with the covariance of Obuchowski NA. Nonparametric
/// analysis of clustered ROC curve data. Biometrics 1997;53:567-78.
///
/// `cluster[u]` numbers unit u's cluster (any `u32`s; clusters need not be
/// contiguous). With I clusters, I₁₀ of them holding a unit with the
/// outcome and I₀₁ one without, M and N units of each outcome, and for
/// cluster i and score r the sums of its centred placement values
/// Aᵣᵢ = Σ (V10ᵣ(X) − θᵣ) over its units with the outcome and
/// Bᵣᵢ = Σ (V01ᵣ(Y) − θᵣ) over those without (the placement values of
/// [`delong`], computed over all units):
///
/// * S10ᵣₛ = I₁₀ / ((I₁₀ − 1) M) · Σᵢ Aᵣᵢ Aₛᵢ
/// * S01ᵣₛ = I₀₁ / ((I₀₁ − 1) N) · Σᵢ Bᵣᵢ Bₛᵢ
/// * S11ᵣₛ = I / (I − 1) · Σᵢ Aᵣᵢ Bₛᵢ
/// * cov(θᵣ, θₛ) = S10ᵣₛ / M + S01ᵣₛ / N + (S11ᵣₛ + S11ₛᵣ) / (M N)
///
/// (for r = s the variance of Obuchowski's paper, S10/M + S01/N +
/// 2 S11/(MN); the covariance of two scores on the same clusters is its
/// bilinear form, written here from the structure of the variance, the
/// paper's formulas being transcribed from memory). With clusters of one
/// unit each, I₁₀ = M, I₀₁ = N and every S11 term is 0: the result is
/// DeLong's.
///
/// # Errors
/// As [`delong`]; [`StatsError::LengthMismatch`] if `cluster` differs in
/// length from `outcome`; [`StatsError::TooFewObservations`] with fewer
/// than 2 clusters holding units of each outcome.
pub fn delong_clustered(
    scores: &[&[f64]],
    outcome: &[bool],
    cluster: &[u32],
) -> Result<DeLongResult, StatsError> {
    super::check_len("clusters", outcome.len(), cluster.len())?;
    let pl = Placements::new(scores, outcome)?;
    let k = pl.aucs.len();
    // Clusters renumbered densely.
    let mut dense: std::collections::HashMap<u32, usize> = Default::default();
    let ids: Vec<usize> = cluster
        .iter()
        .map(|c| {
            let next = dense.len();
            *dense.entry(*c).or_insert(next)
        })
        .collect();
    let nclusters = dense.len();
    // A (k × I) and B (k × I): per score, per cluster sums.
    let mut a = vec![vec![0.0; nclusters]; k];
    let mut b = vec![vec![0.0; nclusters]; k];
    let (mut has_pos, mut has_neg) = (vec![false; nclusters], vec![false; nclusters]);
    let (mut ip, mut ineg) = (0usize, 0usize);
    for (&y, &c) in outcome.iter().zip(&ids) {
        if y {
            has_pos[c] = true;
            for (ar, vr) in a.iter_mut().zip(&pl.v10) {
                ar[c] += vr[ip];
            }
            ip += 1;
        } else {
            has_neg[c] = true;
            for (br, vr) in b.iter_mut().zip(&pl.v01) {
                br[c] += vr[ineg];
            }
            ineg += 1;
        }
    }
    let i10 = has_pos.iter().filter(|&&v| v).count();
    let i01 = has_neg.iter().filter(|&&v| v).count();
    for (what, count) in [("with the outcome", i10), ("without the outcome", i01)] {
        if count < 2 {
            return Err(StatsError::TooFewObservations {
                what: format!("the clustered c-statistic variance (clusters {what})"),
                needed: 2,
                found: count,
            });
        }
    }
    let (mf, nf) = (pl.m as f64, pl.n as f64);
    let (i10f, i01f, itf) = (i10 as f64, i01 as f64, nclusters as f64);
    let dot = |u: &[f64], v: &[f64]| u.iter().zip(v).map(|(x, y)| x * y).sum::<f64>();
    let mut covariance = vec![vec![0.0; k]; k];
    for r in 0..k {
        for s in r..k {
            let s10 = i10f / ((i10f - 1.0) * mf) * dot(&a[r], &a[s]);
            let s01 = i01f / ((i01f - 1.0) * nf) * dot(&b[r], &b[s]);
            let s11_rs = itf / (itf - 1.0) * dot(&a[r], &b[s]);
            let s11_sr = itf / (itf - 1.0) * dot(&a[s], &b[r]);
            let c = s10 / mf + s01 / nf + (s11_rs + s11_sr) / (mf * nf);
            covariance[r][s] = c;
            covariance[s][r] = c;
        }
    }
    Ok(pl.result(covariance))
}

/// The centred placement values of k scores (DeLong et al. 1988).
struct Placements {
    aucs: Vec<f64>,
    /// k × m: V10 − θ of the units with the outcome, in input order.
    v10: Vec<Vec<f64>>,
    /// k × n: V01 − θ of the units without, in input order.
    v01: Vec<Vec<f64>>,
    m: usize,
    n: usize,
}

impl Placements {
    fn new(scores: &[&[f64]], outcome: &[bool]) -> Result<Placements, StatsError> {
        if scores.is_empty() {
            return Err(StatsError::InvalidArgument(
                "DeLong needs at least one score".to_string(),
            ));
        }
        let (m, n) = count_outcome(outcome)?;
        for (what, count) in [("positives", m), ("negatives", n)] {
            if count < 2 {
                return Err(StatsError::TooFewObservations {
                    what: format!("the DeLong variance ({what})"),
                    needed: 2,
                    found: count,
                });
            }
        }
        let k = scores.len();
        let (mf, nf) = (m as f64, n as f64);
        let mut aucs = Vec::with_capacity(k);
        let mut v10 = Vec::with_capacity(k); // k × m, positives in input order
        let mut v01 = Vec::with_capacity(k); // k × n, negatives in input order
        for (r, s) in scores.iter().enumerate() {
            let groups = SortedGroups::new(&format!("score {r}"), s, outcome)?;
            let (pos, neg) = (&groups.positives, &groups.negatives);
            let mut p10 = Vec::with_capacity(m);
            let mut p01 = Vec::with_capacity(n);
            for (&x, &y) in s.iter().zip(outcome) {
                let key = super::order_key(x);
                if y {
                    // negatives strictly below + half of those tied
                    let below = neg.partition_point(|&q| q < key);
                    let not_above = neg.partition_point(|&q| q <= key);
                    p10.push((below + not_above) as f64 / (2.0 * nf));
                } else {
                    // positives strictly above + half of those tied
                    let below = pos.partition_point(|&q| q < key);
                    let not_above = pos.partition_point(|&q| q <= key);
                    p01.push((2 * m - below - not_above) as f64 / (2.0 * mf));
                }
            }
            // θ from the exact integer pair count (bit-identical to `auc`); the
            // mean of the V10 equals it up to rounding.
            aucs.push(groups.twice_u() as f64 / (2.0 * mf * nf));
            v10.push(p10);
            v01.push(p01);
        }
        // Centre the placement values once.
        for (r, theta) in aucs.iter().enumerate() {
            v10[r].iter_mut().for_each(|v| *v -= theta);
            v01[r].iter_mut().for_each(|v| *v -= theta);
        }
        Ok(Placements {
            aucs,
            v10,
            v01,
            m,
            n,
        })
    }

    fn result(self, covariance: Vec<Vec<f64>>) -> DeLongResult {
        let ci95 = (0..self.aucs.len())
            .map(|r| {
                clipped_interval(
                    self.aucs[r],
                    Z_975 * covariance[r][r].max(0.0).sqrt(),
                    0.0,
                    1.0,
                )
            })
            .collect();
        DeLongResult {
            aucs: self.aucs,
            covariance,
            ci95,
            n_positive: self.m,
            n_negative: self.n,
        }
    }
}

/// DeLong test for the difference between the AUCs of two scores measured
/// on the same units (DeLong, DeLong & Clarke-Pearson, Biometrics
/// 1988;44:837-45). Shorthand for `delong(&[a, b], outcome)?.compare(0, 1)`.
///
/// # Errors
/// As for [`delong`] and [`DeLongResult::compare`].
///
/// ```
/// use morbus::stats::delong_test;
/// let y = [true, true, true, false, false, false, true, false];
/// let a = [0.9, 0.8, 0.4, 0.3, 0.35, 0.1, 0.7, 0.6];
/// let b = [0.7, 0.2, 0.6, 0.5, 0.4, 0.1, 0.8, 0.3];
/// let t = delong_test(&a, &b, &y)?;
/// assert!(t.z.is_finite() && t.std_error > 0.0);
/// # Ok::<(), morbus::stats::StatsError>(())
/// ```
pub fn delong_test(a: &[f64], b: &[f64], outcome: &[bool]) -> Result<DeLongTest, StatsError> {
    delong(&[a, b], outcome)?.compare(0, 1)
}

// Index loops mirror the subscripts of the published formulas.
#[cfg(test)]
#[allow(clippy::needless_range_loop)]
mod tests {
    use super::super::roc::tests::Lcg;
    use super::super::{auc, normal_cdf};
    use super::*;
    use approx::assert_relative_eq;

    #[test]
    fn clustered_hand_worked() {
        // Obuchowski NA, Biometrics 1997;53:567-78 (formulas from memory),
        // worked by hand. Three clusters, each one unit with the outcome
        // and one without: cluster 1 scores 3 (outcome) and 1, cluster 2
        // scores 2 and 2, cluster 3 scores 1 and 0. M = N = I = 3.
        // V10 (share of the negatives 1, 2, 0 placed below, ties ½):
        //   X=3: 3/3; X=2: 2.5/3; X=1: 1.5/3.  θ = 7/3 / 3 = 7/9.
        // V01 (share of the positives 3, 2, 1 placed above):
        //   Y=1: 2.5/3; Y=2: 1.5/3; Y=0: 3/3.
        // Centred sums per cluster, in eighteenths:
        //   A = (4, 1, −5)/18, B = (1, −5, 4)/18.
        // ΣA² = ΣB² = 42/324, ΣAB = (4 − 5 − 20)/324 = −21/324.
        // S10 = S01 = 3/(2·3)·42/324 = 21/324; S11 = 3/2·(−21/324).
        // var = 21/324/3 + 21/324/3 + 2·(−31.5/324)/9 = 7/324.
        // Independent units (DeLong): 21/324/3 · 2 = 14/324.
        let y = [true, false, true, false, true, false];
        let s = [3.0, 1.0, 2.0, 2.0, 1.0, 0.0];
        let cl = [7u32, 7, 2, 2, 9, 9];
        let d = delong_clustered(&[&s], &y, &cl).unwrap();
        assert_relative_eq!(d.aucs[0], 7.0 / 9.0, epsilon = 1e-15);
        assert_relative_eq!(d.covariance[0][0], 7.0 / 324.0, epsilon = 1e-15);
        let plain = delong(&[&s], &y).unwrap();
        assert_relative_eq!(plain.covariance[0][0], 14.0 / 324.0, epsilon = 1e-15);
        // Every unit with the outcome in one cluster: no variance.
        assert!(matches!(
            delong_clustered(&[&s], &y, &[1, 2, 1, 2, 1, 2]),
            Err(StatsError::TooFewObservations { .. })
        ));
    }

    #[test]
    fn clusters_of_one_unit_are_delong() {
        // With one unit per cluster the clustered covariance is DeLong's,
        // for the variances and the covariance of two scores.
        let mut rng = Lcg(99);
        let n = 300;
        let y: Vec<bool> = (0..n).map(|_| rng.uniform() < 0.3).collect();
        let a: Vec<f64> = y
            .iter()
            .map(|&v| (rng.uniform() * 6.0).floor() + if v { 1.0 } else { 0.0 })
            .collect();
        let b: Vec<f64> = a
            .iter()
            .map(|v| v + (rng.uniform() * 3.0).floor())
            .collect();
        let ids: Vec<u32> = (0..n as u32).rev().collect();
        let c = delong_clustered(&[&a, &b], &y, &ids).unwrap();
        let d = delong(&[&a, &b], &y).unwrap();
        for r in 0..2 {
            for s in 0..2 {
                assert_relative_eq!(c.covariance[r][s], d.covariance[r][s], max_relative = 1e-12);
            }
        }
        assert_eq!(c.aucs, d.aucs);
    }

    #[test]
    fn clustered_covariance_by_direct_sums() {
        // The covariance of two scores computed as written (explicit ψ over
        // all pairs, per-cluster sums) against the function.
        let mut rng = Lcg(7);
        let n = 120;
        let cl: Vec<u32> = (0..n).map(|u| (u / 3) as u32).collect();
        let y: Vec<bool> = (0..n).map(|_| rng.uniform() < 0.4).collect();
        let a: Vec<f64> = (0..n).map(|_| (rng.uniform() * 5.0).floor()).collect();
        let b: Vec<f64> = (0..n)
            .map(|u| a[u] + (rng.uniform() * 4.0).floor())
            .collect();
        let psi = |x: f64, z: f64| {
            if x > z {
                1.0
            } else if x == z {
                0.5
            } else {
                0.0
            }
        };
        let pos: Vec<usize> = (0..n).filter(|&u| y[u]).collect();
        let neg: Vec<usize> = (0..n).filter(|&u| !y[u]).collect();
        let (m, nn) = (pos.len() as f64, neg.len() as f64);
        let ncl = 40;
        let sums = |s: &[f64]| {
            let theta = pos
                .iter()
                .flat_map(|&i| neg.iter().map(move |&j| (i, j)))
                .map(|(i, j)| psi(s[i], s[j]))
                .sum::<f64>()
                / (m * nn);
            let mut aa = vec![0.0; ncl];
            let mut bb = vec![0.0; ncl];
            for &i in &pos {
                let v10 = neg.iter().map(|&j| psi(s[i], s[j])).sum::<f64>() / nn;
                aa[cl[i] as usize] += v10 - theta;
            }
            for &j in &neg {
                let v01 = pos.iter().map(|&i| psi(s[i], s[j])).sum::<f64>() / m;
                bb[cl[j] as usize] += v01 - theta;
            }
            (aa, bb)
        };
        let (aa, ba) = sums(&a);
        let (ab, bb) = sums(&b);
        let i10 = (0..ncl)
            .filter(|&c| pos.iter().any(|&u| cl[u] as usize == c))
            .count() as f64;
        let i01 = (0..ncl)
            .filter(|&c| neg.iter().any(|&u| cl[u] as usize == c))
            .count() as f64;
        let it = ncl as f64;
        let dot = |u: &[f64], v: &[f64]| u.iter().zip(v).map(|(x, y)| x * y).sum::<f64>();
        let s10 = i10 / ((i10 - 1.0) * m) * dot(&aa, &ab);
        let s01 = i01 / ((i01 - 1.0) * nn) * dot(&ba, &bb);
        let s11 = it / (it - 1.0) * (dot(&aa, &bb) + dot(&ab, &ba));
        let expected = s10 / m + s01 / nn + s11 / (m * nn);
        let got = delong_clustered(&[&a, &b], &y, &cl).unwrap();
        assert_relative_eq!(got.covariance[0][1], expected, max_relative = 1e-10);
    }

    /// Independent direct O(m·n) implementation of DeLong et al. (1988):
    /// explicit ψ kernel over all pairs, placement values, S10/S01.
    fn delong_direct(scores: &[Vec<f64>], outcome: &[bool]) -> (Vec<f64>, Vec<Vec<f64>>) {
        let psi = |x: f64, y: f64| {
            if x > y {
                1.0
            } else if x == y {
                0.5
            } else {
                0.0
            }
        };
        let k = scores.len();
        let pos: Vec<usize> = (0..outcome.len()).filter(|&u| outcome[u]).collect();
        let neg: Vec<usize> = (0..outcome.len()).filter(|&u| !outcome[u]).collect();
        let (m, n) = (pos.len() as f64, neg.len() as f64);
        let mut v10 = vec![vec![0.0; pos.len()]; k];
        let mut v01 = vec![vec![0.0; neg.len()]; k];
        let mut theta = vec![0.0; k];
        for r in 0..k {
            for (a, &i) in pos.iter().enumerate() {
                for (b, &j) in neg.iter().enumerate() {
                    let p = psi(scores[r][i], scores[r][j]);
                    v10[r][a] += p / n;
                    v01[r][b] += p / m;
                    theta[r] += p / (m * n);
                }
            }
        }
        let mut s = vec![vec![0.0; k]; k];
        for r in 0..k {
            for t in 0..k {
                let mut s10 = 0.0;
                for a in 0..pos.len() {
                    s10 += (v10[r][a] - theta[r]) * (v10[t][a] - theta[t]);
                }
                let mut s01 = 0.0;
                for b in 0..neg.len() {
                    s01 += (v01[r][b] - theta[r]) * (v01[t][b] - theta[t]);
                }
                s[r][t] = s10 / (m - 1.0) / m + s01 / (n - 1.0) / n;
            }
        }
        (theta, s)
    }

    /// Hand-worked example. Units (C = case/positive, D = control/negative):
    ///
    /// ```text
    /// unit   C1   D1   C2   C3   D2
    /// A     0.9  0.6  0.6  0.4  0.2
    /// B     0.8  0.1  0.05 0.5  0.5
    /// ```
    ///
    /// Score A: ψ(C, D) rows C1..C3, columns D1, D2:
    ///   C1 = 0.9: (1, 1)   -> V10 = 1
    ///   C2 = 0.6: (½, 1)   -> V10 = 3/4
    ///   C3 = 0.4: (0, 1)   -> V10 = 1/2
    ///   V01(D1 = 0.6) = (1 + ½ + 0)/3 = 1/2, V01(D2 = 0.2) = 1
    ///   θ_A = (1 + 3/4 + 1/2)/3 = 3/4 = (1/2 + 1)/2.
    /// Score B:
    ///   C1 = 0.8:  (1, 1)  -> V10 = 1
    ///   C2 = 0.05: (0, 0)  -> V10 = 0
    ///   C3 = 0.5:  (1, ½)  -> V10 = 3/4
    ///   V01(D1 = 0.1) = (1 + 0 + 1)/3 = 2/3, V01(D2 = 0.5) = (1 + 0 + ½)/3 = 1/2
    ///   θ_B = 7/12.
    /// Centred V10: A (1/4, 0, −1/4), B (5/12, −7/12, 1/6); m − 1 = 2:
    ///   S10_AA = (1/16 + 1/16)/2 = 1/16, S10_BB = (25 + 49 + 4)/144/2 = 13/48,
    ///   S10_AB = (5/48 − 1/24)/2 = 1/32.
    /// Centred V01: A (−1/4, 1/4), B (1/12, −1/12); n − 1 = 1:
    ///   S01_AA = 1/8, S01_BB = 1/72, S01_AB = −1/24.
    /// S = S10/3 + S01/2:
    ///   Var A = 1/48 + 1/16 = 1/12, Var B = 13/144 + 1/144 = 7/72,
    ///   Cov AB = 1/96 − 1/48 = −1/96.
    /// Difference: θ_A − θ_B = 1/6, Var = 1/12 + 7/72 + 1/48 = 29/144,
    ///   SE = √29/12, z = 2/√29.
    #[test]
    fn hand_worked_example() {
        let y = [true, false, true, true, false];
        let a = [0.9, 0.6, 0.6, 0.4, 0.2];
        let b = [0.8, 0.1, 0.05, 0.5, 0.5];
        let d = delong(&[&a, &b], &y).unwrap();
        assert_eq!((d.n_positive, d.n_negative), (3, 2));
        assert_relative_eq!(d.aucs[0], 0.75, max_relative = 1e-15);
        assert_relative_eq!(d.aucs[1], 7.0 / 12.0, max_relative = 1e-15);
        assert_relative_eq!(d.covariance[0][0], 1.0 / 12.0, max_relative = 1e-14);
        assert_relative_eq!(d.covariance[1][1], 7.0 / 72.0, max_relative = 1e-14);
        assert_relative_eq!(d.covariance[0][1], -1.0 / 96.0, max_relative = 1e-14);
        assert_eq!(d.covariance[0][1], d.covariance[1][0]);
        // CI for A: 0.75 ± 1.959964·√(1/12) = 0.75 ± 0.5658 -> upper clipped to 1.
        let se_a = (1.0f64 / 12.0).sqrt();
        assert_relative_eq!(d.ci95[0].0, 0.75 - Z_975 * se_a, max_relative = 1e-13);
        assert_eq!(d.ci95[0].1, 1.0);
        let t = d.compare(0, 1).unwrap();
        assert_relative_eq!(t.difference, 1.0 / 6.0, max_relative = 1e-14);
        assert_relative_eq!(t.std_error, 29f64.sqrt() / 12.0, max_relative = 1e-14);
        assert_relative_eq!(t.z, 2.0 / 29f64.sqrt(), max_relative = 1e-13);
        assert_relative_eq!(
            t.p_value,
            2.0 * normal_cdf(-2.0 / 29f64.sqrt()),
            max_relative = 1e-13
        );
        let reversed = d.compare(1, 0).unwrap();
        assert_relative_eq!(reversed.z, -t.z, max_relative = 1e-15);
        assert_relative_eq!(reversed.p_value, t.p_value, max_relative = 1e-15);
        let t2 = delong_test(&a, &b, &y).unwrap();
        assert_eq!(t2, t);
    }

    #[test]
    fn matches_direct_quadratic_implementation() {
        let mut rng = Lcg(7);
        for trial in 0..12 {
            let n_units = 10 + trial * 17;
            let outcome: Vec<bool> = (0..n_units).map(|_| rng.uniform() < 0.35).collect();
            let n_pos = outcome.iter().filter(|&&y| y).count();
            if n_pos < 2 || n_units - n_pos < 2 {
                continue;
            }
            // Three correlated scores: a latent value plus noise, two of
            // them coarsened to integers so that ties are frequent.
            let latent: Vec<f64> = outcome
                .iter()
                .map(|&y| rng.uniform() + if y { 0.4 } else { 0.0 })
                .collect();
            let s0: Vec<f64> = latent.iter().map(|&l| (l * 5.0).floor()).collect();
            let s1: Vec<f64> = latent.iter().map(|&l| l + 0.5 * rng.uniform()).collect();
            let s2: Vec<f64> = latent
                .iter()
                .map(|&l| (3.0 * (l + rng.uniform())).round() - 1.0)
                .collect();
            let scores = vec![s0, s1, s2];
            let refs: Vec<&[f64]> = scores.iter().map(|s| s.as_slice()).collect();
            let fast = delong(&refs, &outcome).unwrap();
            let (theta, cov) = delong_direct(&scores, &outcome);
            for r in 0..3 {
                assert_relative_eq!(fast.aucs[r], theta[r], max_relative = 1e-12);
                assert_eq!(fast.aucs[r], auc(&scores[r], &outcome).unwrap());
                for s in 0..3 {
                    assert_relative_eq!(
                        fast.covariance[r][s],
                        cov[r][s],
                        epsilon = 1e-15,
                        max_relative = 1e-10
                    );
                }
            }
            // The covariance matrix is positive semi-definite: check the 2×2
            // minors (Cauchy–Schwarz).
            for r in 0..3 {
                for s in 0..3 {
                    let c = fast.covariance[r][s];
                    assert!(c * c <= fast.covariance[r][r] * fast.covariance[s][s] * (1.0 + 1e-12));
                }
            }
        }
    }

    #[test]
    fn ci_levels_and_se() {
        // Hand count: positives 0.9, 0.3, 0.4, 0.7, 0.5 beat 5, 2, 3, 4, 3 of
        // the negatives 0.8, 0.35, 0.1, 0.6, 0.2: AUC = 17/25 = 0.68, far
        // enough from 0 and 1 that no bound is clipped.
        let y = [
            true, true, true, false, false, false, true, false, false, true,
        ];
        let a = [0.9, 0.3, 0.4, 0.8, 0.35, 0.1, 0.7, 0.6, 0.2, 0.5];
        let d = delong(&[&a], &y).unwrap();
        assert_relative_eq!(d.aucs[0], 0.68, max_relative = 1e-15);
        let se = d.std_error(0).unwrap();
        assert_relative_eq!(se * se, d.covariance[0][0], max_relative = 1e-15);
        let (lo95, hi95) = d.ci(0, 0.95).unwrap();
        assert_relative_eq!(lo95, d.ci95[0].0, max_relative = 1e-14);
        assert_relative_eq!(hi95, d.ci95[0].1, max_relative = 1e-14);
        let (lo90, hi90) = d.ci(0, 0.90).unwrap();
        assert!(lo95 < lo90 && hi90 < hi95);
        // 90%: multiplier Φ⁻¹(0.95) = 1.644854 (normal tables).
        assert_relative_eq!(hi90 - d.aucs[0], 1.644_854 * se, max_relative = 1e-6);
        assert!(d.ci(0, 1.0).is_err());
        assert!(d.ci(0, 0.0).is_err());
        assert!(d.ci(1, 0.95).is_err());
        assert!(d.std_error(3).is_err());
        assert_eq!(d.len(), 1);
        assert!(!d.is_empty());
    }

    #[test]
    fn perfect_score_has_zero_width_ci() {
        let y = [false, false, true, true, false, true];
        let s = [0.1, 0.2, 0.8, 0.9, 0.3, 0.7];
        let d = delong(&[&s], &y).unwrap();
        assert_eq!(d.aucs[0], 1.0);
        assert_eq!(d.covariance[0][0], 0.0);
        assert_eq!(d.ci95[0], (1.0, 1.0));
    }

    #[test]
    fn errors() {
        let y = [true, false, true, false];
        let a = [1.0, 2.0, 3.0, 4.0];
        assert!(matches!(
            delong(&[], &y),
            Err(StatsError::InvalidArgument(_))
        ));
        assert_eq!(
            delong(&[&a, &a[..3]], &y),
            Err(StatsError::LengthMismatch {
                what: "score 1".into(),
                expected: 4,
                found: 3
            })
        );
        assert_eq!(
            delong(&[&a, &[1.0, f64::NAN, 0.0, 0.0]], &y),
            Err(StatsError::NonFinite {
                what: "score 1".into(),
                index: 1
            })
        );
        assert!(matches!(
            delong(&[&a], &[true; 4]),
            Err(StatsError::ConstantOutcome { .. })
        ));
        assert_eq!(
            delong(&[&a], &[true, false, false, false]),
            Err(StatsError::TooFewObservations {
                what: "the DeLong variance (positives)".into(),
                needed: 2,
                found: 1
            })
        );
        // Identical (and rank-identical) scores: the difference has zero
        // variance, so z is undefined.
        let b: Vec<f64> = a.iter().map(|v| v * 10.0 + 3.0).collect();
        let d = delong(&[&a, &a, &b], &y).unwrap();
        for (i, j) in [(0, 1), (0, 2)] {
            assert!(matches!(
                d.compare(i, j),
                Err(StatsError::ZeroVariance { .. })
            ));
        }
        // Perfect versus constant: both have zero-variance placements.
        let perfect = [1.0, 0.0, 1.0, 0.0];
        let constant = [5.0; 4];
        let e = delong_test(&perfect, &constant, &y).unwrap_err();
        assert!(e.to_string().contains("zero variance"), "{e}");
        assert!(matches!(
            d.compare(0, 0),
            Err(StatsError::InvalidArgument(_))
        ));
        assert!(matches!(
            d.compare(0, 3),
            Err(StatsError::InvalidArgument(_))
        ));
    }
}
