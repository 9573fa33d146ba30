//! Area under the ROC curve (c-statistic) and the empirical ROC curve.

use super::{check_finite, check_len, count_outcome, order_key, StatsError};

/// Validated scores split by outcome into two sorted arrays of order keys.
pub(super) struct SortedGroups {
    /// Order keys of the scores of positive units, ascending.
    pub positives: Vec<u64>,
    /// Order keys of the scores of negative units, ascending.
    pub negatives: Vec<u64>,
}

impl SortedGroups {
    /// Validates `scores` against `outcome` and sorts each outcome group.
    pub(super) fn new(what: &str, scores: &[f64], outcome: &[bool]) -> Result<Self, StatsError> {
        check_len(what, outcome.len(), scores.len())?;
        check_finite(what, scores)?;
        let (n_pos, n_neg) = count_outcome(outcome)?;
        let mut positives = Vec::with_capacity(n_pos);
        let mut negatives = Vec::with_capacity(n_neg);
        for (&s, &y) in scores.iter().zip(outcome) {
            if y {
                positives.push(order_key(s));
            } else {
                negatives.push(order_key(s));
            }
        }
        positives.sort_unstable();
        negatives.sort_unstable();
        Ok(SortedGroups {
            positives,
            negatives,
        })
    }

    /// Mann–Whitney U statistic, doubled so that it is an exact integer:
    /// 2U = Σ over positive units of (2·#negatives below + #negatives tied).
    pub(super) fn twice_u(&self) -> u128 {
        let (pos, neg) = (&self.positives, &self.negatives);
        let mut twice_u: u128 = 0;
        let mut j = 0; // first negative not below the current value
        let mut i = 0;
        while i < pos.len() {
            let v = pos[i];
            let mut i_end = i + 1;
            while i_end < pos.len() && pos[i_end] == v {
                i_end += 1;
            }
            while j < neg.len() && neg[j] < v {
                j += 1;
            }
            let mut j_end = j;
            while j_end < neg.len() && neg[j_end] == v {
                j_end += 1;
            }
            let tied_pos = (i_end - i) as u128;
            twice_u += tied_pos * (2 * j as u128 + (j_end - j) as u128);
            i = i_end;
        }
        twice_u
    }
}

/// Area under the ROC curve (the c-statistic): the probability that a
/// randomly chosen positive unit scores higher than a randomly chosen
/// negative one, ties counting ½ — i.e. the Mann–Whitney U statistic divided
/// by (#positives × #negatives) (Bamber, J Math Psychol 1975;12:387-415;
/// Hanley & McNeil, Radiology 1982;143:29-36).
///
/// Higher scores are taken to indicate the positive outcome. The count is
/// done exactly in integers after sorting each outcome group, O(n log n).
///
/// # Errors
/// * [`StatsError::LengthMismatch`] if `scores` and `outcome` differ in length;
/// * [`StatsError::NonFinite`] if a score is NaN or infinite;
/// * [`StatsError::ConstantOutcome`] if there is no positive or no negative
///   unit (this includes empty input).
///
/// ```
/// use morbus::stats::auc;
/// let scores = [0.1, 0.4, 0.35, 0.8];
/// let outcome = [false, false, true, true];
/// assert_eq!(auc(&scores, &outcome)?, 0.75);
/// # Ok::<(), morbus::stats::StatsError>(())
/// ```
pub fn auc(scores: &[f64], outcome: &[bool]) -> Result<f64, StatsError> {
    let groups = SortedGroups::new("scores", scores, outcome)?;
    let pairs = groups.positives.len() as f64 * groups.negatives.len() as f64;
    Ok(groups.twice_u() as f64 / (2.0 * pairs))
}

/// Empirical ROC curve: the points (false-positive rate, true-positive rate)
/// obtained by classifying as positive every unit whose score is ≥ t, for
/// each distinct score t taken in decreasing order, preceded by (0, 0)
/// (threshold above every score). The last point is always (1, 1).
///
/// The trapezoidal area under these points equals [`auc`] exactly (ties
/// produce diagonal segments, which is the ½ rule).
///
/// # Errors
/// As for [`auc`].
///
/// ```
/// use morbus::stats::roc_curve;
/// let scores = [0.1, 0.4, 0.35, 0.8];
/// let outcome = [false, false, true, true];
/// let roc = roc_curve(&scores, &outcome)?;
/// assert_eq!(roc, vec![(0.0, 0.0), (0.0, 0.5), (0.5, 0.5), (0.5, 1.0), (1.0, 1.0)]);
/// # Ok::<(), morbus::stats::StatsError>(())
/// ```
pub fn roc_curve(scores: &[f64], outcome: &[bool]) -> Result<Vec<(f64, f64)>, StatsError> {
    let groups = SortedGroups::new("scores", scores, outcome)?;
    let (pos, neg) = (&groups.positives, &groups.negatives);
    let (n_pos, n_neg) = (pos.len() as f64, neg.len() as f64);
    let mut curve = vec![(0.0, 0.0)];
    // Walk both arrays from the top; i, j = number of positives/negatives
    // already at or above the current threshold.
    let (mut i, mut j) = (0usize, 0usize);
    while i < pos.len() || j < neg.len() {
        let next_pos = (i < pos.len()).then(|| pos[pos.len() - 1 - i]);
        let next_neg = (j < neg.len()).then(|| neg[neg.len() - 1 - j]);
        let threshold = match (next_pos, next_neg) {
            (Some(a), Some(b)) => a.max(b),
            (Some(a), None) => a,
            (None, Some(b)) => b,
            (None, None) => break,
        };
        while i < pos.len() && pos[pos.len() - 1 - i] == threshold {
            i += 1;
        }
        while j < neg.len() && neg[neg.len() - 1 - j] == threshold {
            j += 1;
        }
        curve.push((j as f64 / n_neg, i as f64 / n_pos));
    }
    Ok(curve)
}

/// Distinct thresholds of [`roc_curve`], in the same (decreasing) order,
/// without the leading +∞. Used in tests.
#[cfg(test)]
fn roc_thresholds(scores: &[f64], outcome: &[bool]) -> Result<Vec<f64>, StatsError> {
    let groups = SortedGroups::new("scores", scores, outcome)?;
    let mut keys: Vec<u64> = groups
        .positives
        .iter()
        .chain(&groups.negatives)
        .copied()
        .collect();
    keys.sort_unstable();
    keys.dedup();
    Ok(keys.into_iter().rev().map(super::key_value).collect())
}

#[cfg(test)]
pub(super) mod tests {
    use super::*;
    use approx::assert_relative_eq;

    /// Small deterministic generator (64-bit LCG, Knuth's MMIX constants)
    /// for test data; not for statistics.
    pub struct Lcg(pub u64);
    impl Lcg {
        pub fn next_u64(&mut self) -> u64 {
            self.0 = self
                .0
                .wrapping_mul(6_364_136_223_846_793_005)
                .wrapping_add(1_442_695_040_888_963_407);
            self.0 >> 11
        }
        /// Uniform on [0, 1).
        pub fn uniform(&mut self) -> f64 {
            self.next_u64() as f64 / (1u64 << 53) as f64
        }
    }

    /// Direct O(n²) pair count, independent of the sorting code.
    fn auc_pairs(scores: &[f64], outcome: &[bool]) -> f64 {
        let mut sum = 0.0;
        let mut pairs = 0.0;
        for (i, &yi) in outcome.iter().enumerate() {
            if !yi {
                continue;
            }
            for (j, &yj) in outcome.iter().enumerate() {
                if yj {
                    continue;
                }
                pairs += 1.0;
                if scores[i] > scores[j] {
                    sum += 1.0;
                } else if scores[i] == scores[j] {
                    sum += 0.5;
                }
            }
        }
        sum / pairs
    }

    /// Trapezoidal area under a curve.
    fn trapezoid(curve: &[(f64, f64)]) -> f64 {
        curve
            .windows(2)
            .map(|w| (w[1].0 - w[0].0) * (w[1].1 + w[0].1) / 2.0)
            .sum()
    }

    // Fixed data set with ties, used for the scikit-learn comparison.
    const SK_SCORES: [f64; 20] = [
        3.0, 1.0, 0.0, 2.0, 5.0, 1.0, 0.0, 0.0, 4.0, 2.0, 1.0, 3.0, 0.0, 6.0, 2.0, 1.0, 0.0, 3.0,
        2.0, 1.0,
    ];
    const SK_OUTCOME: [u8; 20] = [1, 0, 0, 1, 1, 0, 0, 1, 1, 0, 1, 0, 0, 1, 0, 0, 0, 1, 1, 0];

    fn sk_outcome() -> Vec<bool> {
        SK_OUTCOME.iter().map(|&y| y == 1).collect()
    }

    #[test]
    fn auc_matches_scikit_learn_with_ties() {
        // reference: scikit-learn 1.9.1 roc_auc_score(SK_OUTCOME, SK_SCORES)
        // = 0.808080808080808 (= 80/99; 9 positives, 11 negatives).
        let got = auc(&SK_SCORES, &sk_outcome()).unwrap();
        assert_relative_eq!(got, 0.808_080_808_080_808, max_relative = 1e-15);
        assert_relative_eq!(got, 80.0 / 99.0, max_relative = 1e-15);
    }

    #[test]
    fn roc_curve_matches_scikit_learn() {
        // reference: scikit-learn 1.9.1
        // roc_curve(SK_OUTCOME, SK_SCORES, drop_intermediate=False):
        // fpr * 11 = [0, 0, 0, 0, 1, 3, 7, 11]  (11 negatives)
        // tpr * 9  = [0, 1, 2, 3, 5, 7, 8, 9]   (9 positives)
        // thresholds = [inf, 6, 5, 4, 3, 2, 1, 0]
        let fpr = [0.0, 0.0, 0.0, 0.0, 1.0, 3.0, 7.0, 11.0].map(|v| v / 11.0);
        let tpr = [0.0, 1.0, 2.0, 3.0, 5.0, 7.0, 8.0, 9.0].map(|v| v / 9.0);
        let curve = roc_curve(&SK_SCORES, &sk_outcome()).unwrap();
        assert_eq!(curve.len(), fpr.len());
        for (k, &(f, t)) in curve.iter().enumerate() {
            assert_relative_eq!(f, fpr[k], epsilon = 1e-15);
            assert_relative_eq!(t, tpr[k], epsilon = 1e-15);
        }
        let thresholds = roc_thresholds(&SK_SCORES, &sk_outcome()).unwrap();
        assert_eq!(thresholds, vec![6.0, 5.0, 4.0, 3.0, 2.0, 1.0, 0.0]);
    }

    #[test]
    fn auc_extremes() {
        let y = [false, false, true, true];
        assert_eq!(auc(&[1.0, 2.0, 3.0, 4.0], &y).unwrap(), 1.0);
        assert_eq!(auc(&[4.0, 3.0, 2.0, 1.0], &y).unwrap(), 0.0);
        assert_eq!(auc(&[7.0, 7.0, 7.0, 7.0], &y).unwrap(), 0.5);
        // -0.0 and 0.0 are the same score: a tie.
        assert_eq!(auc(&[-0.0, 1.0], &[true, false]).unwrap(), 0.0);
        assert_eq!(auc(&[-0.0, 0.0], &[true, false]).unwrap(), 0.5);
        // Hand count: positives {0.35, 0.8}, negatives {0.1, 0.4}:
        // 0.35 beats 0.1 only (1), 0.8 beats both (2) -> 3/4.
        assert_eq!(
            auc(&[0.1, 0.4, 0.35, 0.8], &[false, false, true, true]).unwrap(),
            0.75
        );
        // Extreme magnitudes sort correctly.
        assert_eq!(
            auc(
                &[-f64::MAX, f64::MAX, -1e-300, 1e-300],
                &[false, true, false, true]
            )
            .unwrap(),
            1.0
        );
    }

    #[test]
    fn auc_agrees_with_pairwise_count_and_roc_area() {
        let mut rng = Lcg(42);
        for trial in 0..20 {
            let n = 5 + trial * 13;
            // Coarse scores (many ties) correlated with the outcome.
            let outcome: Vec<bool> = (0..n).map(|_| rng.uniform() < 0.3).collect();
            if outcome.iter().all(|&y| y) || outcome.iter().all(|&y| !y) {
                continue;
            }
            let scores: Vec<f64> = outcome
                .iter()
                .map(|&y| (rng.uniform() * 6.0 + if y { 1.5 } else { 0.0 }).floor() - 2.0)
                .collect();
            let a = auc(&scores, &outcome).unwrap();
            assert_relative_eq!(a, auc_pairs(&scores, &outcome), max_relative = 1e-13);
            let curve = roc_curve(&scores, &outcome).unwrap();
            assert_relative_eq!(trapezoid(&curve), a, max_relative = 1e-13);
            assert_eq!(curve.first(), Some(&(0.0, 0.0)));
            assert_eq!(curve.last(), Some(&(1.0, 1.0)));
            for w in curve.windows(2) {
                assert!(w[1].0 >= w[0].0 && w[1].1 >= w[0].1);
                assert!(w[1] != w[0]);
            }
        }
    }

    #[test]
    fn auc_errors() {
        assert_eq!(
            auc(&[1.0, 2.0], &[true]),
            Err(StatsError::LengthMismatch {
                what: "scores".into(),
                expected: 1,
                found: 2
            })
        );
        assert_eq!(
            auc(&[1.0, 2.0], &[true, true]),
            Err(StatsError::ConstantOutcome {
                positives: 2,
                negatives: 0
            })
        );
        assert_eq!(
            auc(&[1.0, 2.0], &[false, false]),
            Err(StatsError::ConstantOutcome {
                positives: 0,
                negatives: 2
            })
        );
        assert!(matches!(
            auc(&[], &[]),
            Err(StatsError::ConstantOutcome { .. })
        ));
        assert_eq!(
            auc(&[1.0, f64::NAN, 0.0], &[true, false, false]),
            Err(StatsError::NonFinite {
                what: "scores".into(),
                index: 1
            })
        );
        assert!(matches!(
            roc_curve(&[1.0, f64::INFINITY], &[true, false]),
            Err(StatsError::NonFinite { index: 1, .. })
        ));
        assert!(matches!(
            roc_curve(&[1.0], &[true]),
            Err(StatsError::ConstantOutcome { .. })
        ));
    }
}
