//! Restricted (natural) cubic splines of one numeric predictor.
//!
//! With knots t₁ < … < t_K the spline is linear below t₁ and above t_K and
//! cubic between knots, with continuous first and second derivatives. It
//! enters a model as x itself plus K − 2 terms (Durrleman S, Simon R.
//! Flexible regression models with cubic splines. Stat Med
//! 1989;8:551-61), for j = 1, …, K − 2:
//!
//! Sⱼ(x) = [(x − tⱼ)₊³ − (x − t_{K−1})₊³ (t_K − tⱼ)/(t_K − t_{K−1})
//!          + (x − t_K)₊³ (t_{K−1} − tⱼ)/(t_K − t_{K−1})] / (t_K − t₁)²
//!
//! where u₊ = max(u, 0). The division by (t_K − t₁)² only rescales the
//! terms (and their coefficients) so that they are on the scale of x; it is
//! the usual normalisation (Harrell FE. Regression Modeling Strategies, 2nd
//! ed. Springer 2015, section 2.4.5) and changes no fitted value.
//!
//! Knots are placed at the quantiles of the predictor recommended by
//! Harrell (Regression Modeling Strategies, 2nd ed. 2015, section 2.4.6,
//! Table 2.3), transcribed from memory:
//!
//! | K | quantiles |
//! |---|---|
//! | 3 | 0.10 0.50 0.90 |
//! | 4 | 0.05 0.35 0.65 0.95 |
//! | 5 | 0.05 0.275 0.50 0.725 0.95 |
//! | 6 | 0.05 0.23 0.41 0.59 0.77 0.95 |
//! | 7 | 0.025 0.1833 0.3417 0.50 0.6583 0.8167 0.975 |
//!
//! Quantiles are the linear-interpolation ones (Hyndman & Fan type 7, as
//! elsewhere in this module).

use super::{check_finite, StatsError};

/// Fewest knots a restricted cubic spline may have.
pub const MIN_KNOTS: usize = 3;
/// Most knots.
pub const MAX_KNOTS: usize = 7;
/// Knots when none are given.
pub const DEFAULT_KNOTS: usize = 4;

/// The quantiles at which `k` knots are placed (Harrell 2015, Table 2.3;
/// see the module documentation), or `None` outside 3 to 7.
pub fn knot_quantiles(k: usize) -> Option<&'static [f64]> {
    Some(match k {
        3 => &[0.10, 0.50, 0.90],
        4 => &[0.05, 0.35, 0.65, 0.95],
        5 => &[0.05, 0.275, 0.50, 0.725, 0.95],
        6 => &[0.05, 0.23, 0.41, 0.59, 0.77, 0.95],
        7 => &[0.025, 0.1833, 0.3417, 0.50, 0.6583, 0.8167, 0.975],
        _ => return None,
    })
}

/// The `k` knots of `values`: their quantiles at [`knot_quantiles`].
///
/// # Errors
/// [`StatsError::InvalidArgument`] for `k` outside 3 to 7, no values, or
/// knots that are not strictly increasing (too few distinct values where
/// the knots fall: fewer knots are needed); [`StatsError::NonFinite`] for
/// a NaN or infinite value.
pub fn knots(values: &[f64], k: usize) -> Result<Vec<f64>, StatsError> {
    let q = knot_quantiles(k).ok_or_else(|| {
        StatsError::InvalidArgument(format!(
            "a restricted cubic spline takes {MIN_KNOTS} to {MAX_KNOTS} knots, not {k}"
        ))
    })?;
    if values.is_empty() {
        return Err(StatsError::InvalidArgument(
            "no values to place spline knots in".into(),
        ));
    }
    check_finite("spline values", values)?;
    let mut sorted = values.to_vec();
    sorted.sort_unstable_by(f64::total_cmp);
    let t: Vec<f64> = q
        .iter()
        .map(|&p| super::summary::quantile_sorted(&sorted, p))
        .collect();
    if let Some(w) = t.windows(2).find(|w| w[1] <= w[0]) {
        return Err(StatsError::InvalidArgument(format!(
            "{k} spline knots at the quantiles {} fall on equal values ({} twice): the \
             values have too few distinct values there; use fewer knots",
            q.iter()
                .map(|p| p.to_string())
                .collect::<Vec<_>>()
                .join(", "),
            w[0]
        )));
    }
    Ok(t)
}

/// The K − 2 nonlinear terms Sⱼ(x) of the restricted cubic spline with
/// `knots` (at least 3, strictly increasing), written into `out`
/// (length K − 2).
///
/// ```
/// use morbus::stats::spline_terms;
/// let knots = [0.0, 1.0, 2.0];
/// let mut s = [0.0];
/// spline_terms(-1.0, &knots, &mut s);
/// assert_eq!(s[0], 0.0); // linear (no cubic part) below the first knot
/// spline_terms(1.0, &knots, &mut s);
/// assert_eq!(s[0], 1.0 / 4.0); // (1 − 0)³ / (2 − 0)²
/// ```
pub fn spline_terms(x: f64, knots: &[f64], out: &mut [f64]) {
    let k = knots.len();
    let (tk, tk1) = (knots[k - 1], knots[k - 2]);
    let norm = (tk - knots[0]) * (tk - knots[0]);
    let cube = |u: f64| if u > 0.0 { u * u * u } else { 0.0 };
    let (c_k1, c_k) = (cube(x - tk1), cube(x - tk));
    for (j, o) in out.iter_mut().enumerate().take(k - 2) {
        let tj = knots[j];
        *o = (cube(x - tj) - c_k1 * (tk - tj) / (tk - tk1) + c_k * (tk1 - tj) / (tk - tk1)) / norm;
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    #[test]
    fn quantiles_are_symmetric_and_increasing() {
        // Harrell 2015 Table 2.3 (from memory): symmetric about 0.5.
        for k in MIN_KNOTS..=MAX_KNOTS {
            let q = knot_quantiles(k).unwrap();
            assert_eq!(q.len(), k);
            for (a, b) in q.iter().zip(q.iter().rev()) {
                assert_relative_eq!(a + b, 1.0, epsilon = 1e-4);
            }
            assert!(q.windows(2).all(|w| w[0] < w[1]));
        }
        assert!(knot_quantiles(2).is_none() && knot_quantiles(8).is_none());
    }

    #[test]
    fn knots_are_type_7_quantiles() {
        // 0..=100: the type-7 quantile at p is 100 p exactly.
        let v: Vec<f64> = (0..=100).map(f64::from).collect();
        let t = knots(&v, 4).unwrap();
        for (a, b) in t.iter().zip([5.0, 35.0, 65.0, 95.0]) {
            assert_relative_eq!(*a, b, epsilon = 1e-9);
        }
        assert!(knots(&[1.0, 1.0, 1.0, 2.0], 3).is_err());
        assert!(knots(&v, 8).is_err());
        assert!(knots(&[], 4).is_err());
    }

    #[test]
    fn hand_worked_terms() {
        // Knots 0, 1, 2, 4 (K = 4, two terms); norm (4 − 0)² = 16.
        // x = 3: (x − t₃)₊³ = 1, (x − t₄)₊³ = 0;
        //   S₁ = [(3 − 0)³ − 1·(4 − 0)/(4 − 2) + 0]/16 = 25/16;
        //   S₂ = [(3 − 1)³ − 1·(4 − 1)/(4 − 2) + 0]/16 = 6.5/16.
        let t = [0.0, 1.0, 2.0, 4.0];
        let mut s = [0.0; 2];
        spline_terms(3.0, &t, &mut s);
        assert_relative_eq!(s[0], 25.0 / 16.0, epsilon = 1e-15);
        assert_relative_eq!(s[1], 6.5 / 16.0, epsilon = 1e-15);
        // Beyond the last knot the terms are linear in x: equal second
        // differences vanish.
        let at = |x: f64| {
            let mut s = [0.0; 2];
            spline_terms(x, &t, &mut s);
            s
        };
        let (a, b, c) = (at(5.0), at(6.0), at(7.0));
        for j in 0..2 {
            assert_relative_eq!(a[j] - 2.0 * b[j] + c[j], 0.0, epsilon = 1e-12);
        }
        // Below the first knot every term is 0.
        assert_eq!(at(-3.0), [0.0, 0.0]);
    }
}
