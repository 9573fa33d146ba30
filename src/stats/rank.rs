//! Average ranks and Spearman's rank correlation.

use super::{check_finite, check_len, order_key, StatsError};

/// Ranks 1..=n of `values`, ties receiving the average of the ranks they
/// span (the "average" or midrank method; `scipy.stats.rankdata` default).
/// `-0.0` and `0.0` tie. O(n log n).
///
/// # Errors
/// [`StatsError::NonFinite`] for a NaN or infinite value.
///
/// ```
/// use morbus::stats::average_ranks;
/// assert_eq!(average_ranks(&[10.0, 20.0, 10.0, 5.0])?, vec![2.5, 4.0, 2.5, 1.0]);
/// # Ok::<(), morbus::stats::StatsError>(())
/// ```
pub fn average_ranks(values: &[f64]) -> Result<Vec<f64>, StatsError> {
    check_finite("values", values)?;
    Ok(ranks_unchecked(values))
}

fn ranks_unchecked(values: &[f64]) -> Vec<f64> {
    let mut order: Vec<(u64, usize)> = values
        .iter()
        .enumerate()
        .map(|(i, &v)| (order_key(v), i))
        .collect();
    order.sort_unstable();
    let mut ranks = vec![0.0; values.len()];
    let mut start = 0;
    while start < order.len() {
        let key = order[start].0;
        let mut end = start + 1;
        while end < order.len() && order[end].0 == key {
            end += 1;
        }
        // Positions start..end hold ranks start+1 ..= end; their mean:
        let rank = (start + 1 + end) as f64 / 2.0;
        for &(_, i) in &order[start..end] {
            ranks[i] = rank;
        }
        start = end;
    }
    ranks
}

/// Spearman's rank correlation coefficient ρ (Spearman, Am J Psychol
/// 1904;15:72-101): the Pearson correlation of the average ranks of `a` and
/// `b`, which handles ties correctly. O(n log n).
///
/// # Errors
/// * [`StatsError::LengthMismatch`] if the inputs differ in length;
/// * [`StatsError::NonFinite`] for a NaN/infinite value;
/// * [`StatsError::TooFewObservations`] for fewer than 2 pairs;
/// * [`StatsError::ZeroVariance`] if all values of an input are tied.
///
/// ```
/// use morbus::stats::spearman;
/// let a = [1.0, 2.0, 3.0, 4.0];
/// assert_eq!(spearman(&a, &[10.0, 20.0, 30.0, 40.0])?, 1.0);
/// assert_eq!(spearman(&a, &[4.0, 3.0, 2.0, 1.0])?, -1.0);
/// # Ok::<(), morbus::stats::StatsError>(())
/// ```
pub fn spearman(a: &[f64], b: &[f64]) -> Result<f64, StatsError> {
    check_len("second input", a.len(), b.len())?;
    check_finite("first input", a)?;
    check_finite("second input", b)?;
    if a.len() < 2 {
        return Err(StatsError::TooFewObservations {
            what: "Spearman's correlation".to_string(),
            needed: 2,
            found: a.len(),
        });
    }
    let ra = ranks_unchecked(a);
    let rb = ranks_unchecked(b);
    // The mean rank is exactly (n + 1)/2, ties or not.
    let mid = (a.len() + 1) as f64 / 2.0;
    let (mut sab, mut saa, mut sbb) = (0.0, 0.0, 0.0);
    for (&x, &y) in ra.iter().zip(&rb) {
        let (dx, dy) = (x - mid, y - mid);
        sab += dx * dy;
        saa += dx * dx;
        sbb += dy * dy;
    }
    for (what, s) in [("first input", saa), ("second input", sbb)] {
        if s == 0.0 {
            return Err(StatsError::ZeroVariance {
                what: format!("the {what} to Spearman's correlation (all values tied)"),
            });
        }
    }
    Ok((sab / (saa * sbb).sqrt()).clamp(-1.0, 1.0))
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    #[test]
    fn ranks_with_ties() {
        // reference: scipy 1.17.1 rankdata([3, 1, 4, 1, 5, 9, 2, 6, 5, 3, 5])
        // = [4.5, 1.5, 6, 1.5, 8, 11, 3, 10, 8, 4.5, 8]
        let r = average_ranks(&[3.0, 1.0, 4.0, 1.0, 5.0, 9.0, 2.0, 6.0, 5.0, 3.0, 5.0]).unwrap();
        assert_eq!(
            r,
            vec![4.5, 1.5, 6.0, 1.5, 8.0, 11.0, 3.0, 10.0, 8.0, 4.5, 8.0]
        );
        assert_eq!(average_ranks(&[-0.0, 0.0]).unwrap(), vec![1.5, 1.5]);
        assert_eq!(average_ranks(&[]).unwrap(), Vec::<f64>::new());
        assert!(matches!(
            average_ranks(&[1.0, f64::NAN]),
            Err(StatsError::NonFinite { index: 1, .. })
        ));
    }

    #[test]
    fn spearman_matches_scipy() {
        // Integer comorbidity-like scores with many ties.
        let a = [
            0.0, 1.0, 0.0, 2.0, 3.0, 0.0, 1.0, 5.0, 2.0, 0.0, 1.0, 4.0, 0.0, 2.0, 1.0,
        ];
        let b = [
            0.0, 2.0, 1.0, 2.0, 5.0, 0.0, 0.0, 7.0, 3.0, 1.0, 1.0, 3.0, 0.0, 4.0, 0.0,
        ];
        // reference: scipy 1.17.1 spearmanr(a, b).statistic
        let want = 0.829_268_900_839_015;
        assert_relative_eq!(spearman(&a, &b).unwrap(), want, max_relative = 1e-14);
        assert_relative_eq!(spearman(&b, &a).unwrap(), want, max_relative = 1e-14);
    }

    #[test]
    fn spearman_invariant_to_monotone_transforms() {
        let a = [0.3, 1.7, -2.0, 4.4, 0.0, 2.2, 9.0];
        let b = [1.0, 0.5, -1.0, 3.0, 0.2, 0.1, 2.0];
        let ea: Vec<f64> = a.iter().map(|v: &f64| v.exp()).collect();
        let cb: Vec<f64> = b.iter().map(|v| v * v * v).collect();
        assert_relative_eq!(
            spearman(&a, &b).unwrap(),
            spearman(&ea, &cb).unwrap(),
            max_relative = 1e-15
        );
        // Without ties, ρ = 1 − 6 Σ d² / (n (n² − 1)); hand count of d:
        // ranks a = (3, 4, 1, 6, 2, 5, 7), ranks b = (5, 4, 1, 7, 3, 2, 6)
        // d = (−2, 0, 0, −1, −1, 3, 1), Σ d² = 16, ρ = 1 − 96/336 = 5/7
        // (scipy 1.17.1 spearmanr agrees: 0.7142857142857144).
        assert_relative_eq!(spearman(&a, &b).unwrap(), 5.0 / 7.0, max_relative = 1e-14);
    }

    #[test]
    fn spearman_errors() {
        assert!(matches!(
            spearman(&[1.0, 2.0], &[1.0]),
            Err(StatsError::LengthMismatch { .. })
        ));
        assert!(matches!(
            spearman(&[1.0], &[1.0]),
            Err(StatsError::TooFewObservations {
                needed: 2,
                found: 1,
                ..
            })
        ));
        let e = spearman(&[1.0, 2.0, 3.0], &[4.0, 4.0, 4.0]).unwrap_err();
        assert!(matches!(e, StatsError::ZeroVariance { .. }));
        assert!(e.to_string().contains("second input"));
        assert!(matches!(
            spearman(&[f64::INFINITY, 2.0], &[1.0, 2.0]),
            Err(StatsError::NonFinite { index: 0, .. })
        ));
    }
}
