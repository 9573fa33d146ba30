//! Descriptive summary of a numeric variable.

use super::{check_finite, StatsError};

/// Descriptive statistics of a sample: size, mean, SD, five-number summary
/// and the share of values equal to zero (e.g. patients with no
/// comorbidity).
///
/// Quartiles use linear interpolation between order statistics — type 7 of
/// Hyndman & Fan (Am Stat 1996;50:361-5), the default of numpy's
/// `percentile`/`quantile` (`method="linear"`) and of R's `quantile`: for
/// probability p and sorted values x₀ ≤ … ≤ x_{n−1}, with h = (n − 1)p,
/// Q(p) = x_⌊h⌋ + (h − ⌊h⌋)(x_⌊h⌋+1 − x_⌊h⌋).
#[derive(Debug, Clone, PartialEq)]
pub struct Summary {
    /// Number of values.
    pub n: usize,
    /// Arithmetic mean.
    pub mean: f64,
    /// Sample standard deviation (divisor n − 1); `None` when n = 1.
    pub sd: Option<f64>,
    /// Smallest value.
    pub min: f64,
    /// First quartile (25th percentile).
    pub q1: f64,
    /// Median.
    pub median: f64,
    /// Third quartile (75th percentile).
    pub q3: f64,
    /// Largest value.
    pub max: f64,
    /// Share of values equal to zero (`-0.0` counts as zero), in [0, 1].
    pub zero_share: f64,
}

impl Summary {
    /// Summarises `values`. O(n log n) (one sort of a copy).
    ///
    /// # Errors
    /// [`StatsError::TooFewObservations`] for an empty slice;
    /// [`StatsError::NonFinite`] for a NaN or infinite value.
    ///
    /// ```
    /// use morbus::stats::Summary;
    /// let s = Summary::of(&[0.0, 1.0, 0.0, 3.0, 6.0])?;
    /// assert_eq!((s.n, s.min, s.median, s.max), (5, 0.0, 1.0, 6.0));
    /// assert_eq!((s.q1, s.q3), (0.0, 3.0));
    /// assert_eq!(s.mean, 2.0);
    /// assert_eq!(s.zero_share, 0.4);
    /// assert_eq!(s.sd, Some(6.5f64.sqrt()));
    /// # Ok::<(), morbus::stats::StatsError>(())
    /// ```
    pub fn of(values: &[f64]) -> Result<Summary, StatsError> {
        if values.is_empty() {
            return Err(StatsError::TooFewObservations {
                what: "a summary".to_string(),
                needed: 1,
                found: 0,
            });
        }
        check_finite("values", values)?;
        let n = values.len();
        let nf = n as f64;
        // Two-pass mean with a correction pass, then centred sum of squares.
        let mut mean = values.iter().sum::<f64>() / nf;
        mean += values.iter().map(|v| v - mean).sum::<f64>() / nf;
        let sd = (n > 1).then(|| {
            (values.iter().map(|v| (v - mean) * (v - mean)).sum::<f64>() / (nf - 1.0)).sqrt()
        });
        let mut sorted = values.to_vec();
        sorted.sort_unstable_by(f64::total_cmp);
        let zeros = values.iter().filter(|&&v| v == 0.0).count();
        Ok(Summary {
            n,
            mean,
            sd,
            min: sorted[0],
            q1: quantile_sorted(&sorted, 0.25),
            median: quantile_sorted(&sorted, 0.5),
            q3: quantile_sorted(&sorted, 0.75),
            max: sorted[n - 1],
            zero_share: zeros as f64 / nf,
        })
    }
}

/// Linear-interpolation quantile (Hyndman & Fan type 7) of a non-empty
/// sorted slice, 0 ≤ p ≤ 1, computed the way numpy does (interpolating from
/// the nearer order statistic) so results agree to the last bit.
pub(super) fn quantile_sorted(sorted: &[f64], p: f64) -> f64 {
    let h = (sorted.len() - 1) as f64 * p;
    let lo = h.floor();
    let i = lo as usize;
    if i + 1 >= sorted.len() {
        return sorted[sorted.len() - 1];
    }
    let (a, b) = (sorted[i], sorted[i + 1]);
    let t = h - lo;
    let diff = b - a;
    if a == b {
        a
    } else if t >= 0.5 {
        b - diff * (1.0 - t)
    } else {
        a + diff * t
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    #[test]
    fn matches_numpy() {
        let v = [
            2.5, 0.0, 7.25, 1.0, 0.0, 3.75, 12.0, 0.5, 4.0, 0.0, 9.5, 1.25, -2.0,
        ];
        // reference: numpy 2.4.6 — mean, std(ddof=1), and
        // percentile(v, [25, 50, 75]) with the default method="linear".
        let s = Summary::of(&v).unwrap();
        assert_eq!(s.n, 13);
        assert_relative_eq!(s.mean, 3.0576923076923075, max_relative = 1e-15);
        assert_relative_eq!(s.sd.unwrap(), 4.167275596530171, max_relative = 1e-14);
        assert_eq!(s.min, -2.0);
        assert_relative_eq!(s.q1, 0.0, epsilon = 1e-15);
        assert_relative_eq!(s.median, 1.25, max_relative = 1e-15);
        assert_relative_eq!(s.q3, 4.0, max_relative = 1e-15);
        assert_eq!(s.max, 12.0);
        assert_relative_eq!(s.zero_share, 3.0 / 13.0, max_relative = 1e-15);
    }

    #[test]
    fn matches_numpy_interpolated_quartiles() {
        // n = 10: h = 2.25, 4.5, 6.75, so all three quartiles interpolate.
        let v = [0.3, 5.1, 2.2, 8.9, 0.0, 4.4, 1.7, 6.6, 3.3, 10.2];
        // reference: numpy 2.4.6 percentile(v, [25, 50, 75]) (method="linear")
        let s = Summary::of(&v).unwrap();
        assert_relative_eq!(s.q1, 1.825, max_relative = 1e-15);
        assert_relative_eq!(s.median, 3.85, max_relative = 1e-15);
        assert_relative_eq!(s.q3, 6.225, max_relative = 1e-15);
        // reference: numpy 2.4.6 mean and std(ddof=1)
        assert_relative_eq!(s.mean, 4.270_000_000_000_000_5, max_relative = 1e-15);
        assert_relative_eq!(s.sd.unwrap(), 3.473087003421212, max_relative = 1e-14);
        assert_eq!(s.zero_share, 0.1);
    }

    #[test]
    fn single_value_and_constant() {
        let s = Summary::of(&[4.0]).unwrap();
        assert_eq!(
            (s.n, s.mean, s.sd, s.min, s.q1, s.median, s.q3, s.max),
            (1, 4.0, None, 4.0, 4.0, 4.0, 4.0, 4.0)
        );
        assert_eq!(s.zero_share, 0.0);
        let s = Summary::of(&[0.0, -0.0, 0.0]).unwrap();
        assert_eq!(s.sd, Some(0.0));
        assert_eq!(s.zero_share, 1.0);
        // Mean of large offset values is accurate (correction pass).
        let s = Summary::of(&[1e9 + 0.1, 1e9 + 0.2, 1e9 + 0.3]).unwrap();
        assert_relative_eq!(s.mean, 1e9 + 0.2, max_relative = 1e-15);
        assert_relative_eq!(s.sd.unwrap(), 0.1, max_relative = 1e-6);
    }

    #[test]
    fn errors() {
        assert!(matches!(
            Summary::of(&[]),
            Err(StatsError::TooFewObservations {
                needed: 1,
                found: 0,
                ..
            })
        ));
        assert!(matches!(
            Summary::of(&[1.0, f64::NEG_INFINITY]),
            Err(StatsError::NonFinite { index: 1, .. })
        ));
    }
}
