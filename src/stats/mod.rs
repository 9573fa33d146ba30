//! Pure-Rust numerics for comparing comorbidity indices.
//!
//! Everything here depends on `std` only and is written to handle
//! 1,000,000 units × a handful of scores: all rank-based quantities are
//! computed by sorting (O(n log n)); nothing is quadratic in the number of
//! units.
//!
//! | what | function |
//! | --- | --- |
//! | c-statistic (area under the ROC curve) | [`auc`] |
//! | ROC curve | [`roc_curve`] |
//! | DeLong covariance, CIs and test for correlated AUCs | [`delong`], [`delong_test`], [`DeLongResult::compare`] |
//! | logistic regression (Newton–Raphson) | [`logistic`] |
//! | Spearman's rank correlation | [`spearman`], [`average_ranks`] |
//! | descriptive summary (mean, SD, quartiles, share of zeros) | [`Summary::of`] |
//! | incomplete gamma, chi-square and Poisson distributions, exact Poisson limits, funnel limits | [`gamma_p`], [`gamma_q`], [`gamma_p_inverse`], [`chi_square_quantile`], [`chi_square_sf`], [`poisson_cdf`], [`poisson_exact_limits`], [`funnel_limit`] |
//! | normal distribution | [`erf`], [`erfc`], [`normal_cdf`], [`normal_sf`], [`normal_quantile`], [`two_sided_p`] |
//!
//! # Errors
//!
//! No function in this module panics on bad data or returns a NaN silently:
//! invalid input (mismatched lengths, non-finite values, a constant outcome,
//! a separated or singular regression, …) is reported as a [`StatsError`]
//! value. The only functions that may return NaN are the scalar special
//! functions ([`erf`], [`erfc`], [`normal_cdf`], [`normal_sf`]) when their
//! argument itself is NaN, following IEEE-754 convention.
//!
//! ```
//! use morbus::stats::{auc, delong, spearman, Summary};
//!
//! let died = [true, false, true, false, false, true];
//! let charlson = [3.0, 0.0, 2.0, 1.0, 0.0, 5.0];
//! let elixhauser = [4.0, 1.0, 1.0, 2.0, 0.0, 6.0];
//!
//! let c = auc(&charlson, &died)?;
//! assert!(c > 0.9);
//!
//! let d = delong(&[&charlson, &elixhauser], &died)?;
//! let test = d.compare(0, 1)?;
//! assert!(test.p_value > 0.05);
//!
//! let rho = spearman(&charlson, &elixhauser)?;
//! assert!(rho > 0.5);
//!
//! let s = Summary::of(&charlson)?;
//! assert_eq!(s.n, 6);
//! # Ok::<(), morbus::stats::StatsError>(())
//! ```

use std::fmt;

mod delong;
mod gamma;
mod linalg;
mod logistic;
mod normal;
mod rank;
mod roc;
mod spline;
mod summary;

pub use delong::{delong, delong_clustered, delong_test, DeLongResult, DeLongTest};
pub use gamma::{
    chi_square_quantile, chi_square_sf, funnel_limit, gamma_p, gamma_p_inverse, gamma_q, ln_gamma,
    poisson_cdf, poisson_exact_limits,
};
pub use logistic::{
    cluster_robust_covariance, logistic, logistic_from, logistic_patterns, ClusterCovariance,
    Coefficient, LogisticFit, Patterns, INTERCEPT_NAME,
};
pub use normal::{erf, erfc, normal_cdf, normal_quantile, normal_sf, two_sided_p, Z_975};
pub use rank::{average_ranks, spearman};
pub use roc::{auc, roc_curve};
pub use spline::{knot_quantiles, knots, spline_terms, DEFAULT_KNOTS, MAX_KNOTS, MIN_KNOTS};
pub use summary::Summary;

/// Everything that can go wrong in this module, as a value.
///
/// `what` fields name the offending input (`"scores"`, `"score 2"`,
/// `"predictor 'age'"`, …) so that messages are actionable.
#[derive(Debug, Clone, PartialEq)]
#[non_exhaustive]
pub enum StatsError {
    /// Two inputs that must be paired element by element differ in length.
    LengthMismatch {
        /// Which input has the wrong length.
        what: String,
        /// The length it should have had.
        expected: usize,
        /// The length it had.
        found: usize,
    },
    /// An input contained NaN or ±infinity.
    NonFinite {
        /// Which input.
        what: String,
        /// Zero-based position of the first offending value.
        index: usize,
    },
    /// The binary outcome has no positives or no negatives, so
    /// discrimination (or a regression) is undefined.
    ConstantOutcome {
        /// Number of units with outcome `true`.
        positives: usize,
        /// Number of units with outcome `false`.
        negatives: usize,
    },
    /// Not enough observations for the requested quantity.
    TooFewObservations {
        /// What needed them (e.g. `"DeLong variance: positives"`).
        what: String,
        /// Minimum number required.
        needed: usize,
        /// Number available.
        found: usize,
    },
    /// A quantity whose variance is the denominator of the result has zero
    /// variance (e.g. a constant input to a correlation, or a DeLong contrast
    /// with zero standard error).
    ZeroVariance {
        /// What has zero variance.
        what: String,
    },
    /// A regression predictor takes a single value on every unit.
    ConstantPredictor {
        /// Name of the predictor.
        name: String,
        /// The value it always takes.
        value: f64,
    },
    /// A regression predictor is (numerically) a linear combination of the
    /// intercept and the predictors before it.
    CollinearPredictor {
        /// Name of the predictor found to be redundant.
        name: String,
    },
    /// The outcome is perfectly or quasi-completely separated by a linear
    /// combination of the predictors: the maximum-likelihood estimates do
    /// not exist (some coefficients diverge to ±∞).
    Separation {
        /// How it was detected.
        detail: String,
    },
    /// An iterative fit did not converge within its iteration limit.
    NotConverged {
        /// Iterations performed.
        iterations: usize,
    },
    /// An argument outside its domain (e.g. a confidence level of 1.2,
    /// an index past the number of scores).
    InvalidArgument(String),
}

impl fmt::Display for StatsError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            StatsError::LengthMismatch {
                what,
                expected,
                found,
            } => write!(
                f,
                "length mismatch: {what} has {found} values but {expected} were expected"
            ),
            StatsError::NonFinite { what, index } => write!(
                f,
                "{what} contains a non-finite value (NaN or infinity) at position {index}"
            ),
            StatsError::ConstantOutcome {
                positives,
                negatives,
            } => {
                if *positives == 0 {
                    write!(
                        f,
                        "outcome is constant: no positive units among {negatives} \
                         (need at least one positive and one negative)"
                    )
                } else {
                    write!(
                        f,
                        "outcome is constant: no negative units among {positives} \
                         (need at least one positive and one negative)"
                    )
                }
            }
            StatsError::TooFewObservations {
                what,
                needed,
                found,
            } => write!(
                f,
                "too few observations for {what}: need at least {needed}, have {found}"
            ),
            StatsError::ZeroVariance { what } => write!(f, "{what} has zero variance"),
            StatsError::ConstantPredictor { name, value } => write!(
                f,
                "predictor '{name}' is constant (every value is {value}); \
                 drop it from the model"
            ),
            StatsError::CollinearPredictor { name } => write!(
                f,
                "predictor '{name}' is collinear with the intercept and/or earlier \
                 predictors (singular information matrix); drop or combine it"
            ),
            StatsError::Separation { detail } => write!(
                f,
                "perfect or quasi-complete separation: {detail}; maximum-likelihood \
                 estimates do not exist"
            ),
            StatsError::NotConverged { iterations } => write!(
                f,
                "logistic regression did not converge in {iterations} iterations"
            ),
            StatsError::InvalidArgument(msg) => write!(f, "invalid argument: {msg}"),
        }
    }
}

impl std::error::Error for StatsError {}

// ---------------------------------------------------------------------------
// Shared input validation.

/// Checks that `values` has length `expected`.
fn check_len(what: &str, expected: usize, found: usize) -> Result<(), StatsError> {
    if expected == found {
        Ok(())
    } else {
        Err(StatsError::LengthMismatch {
            what: what.to_string(),
            expected,
            found,
        })
    }
}

/// Checks that every value is finite.
fn check_finite(what: &str, values: &[f64]) -> Result<(), StatsError> {
    match values.iter().position(|v| !v.is_finite()) {
        None => Ok(()),
        Some(index) => Err(StatsError::NonFinite {
            what: what.to_string(),
            index,
        }),
    }
}

/// Counts positives and negatives; errors if either is zero.
fn count_outcome(outcome: &[bool]) -> Result<(usize, usize), StatsError> {
    let positives = outcome.iter().filter(|&&y| y).count();
    let negatives = outcome.len() - positives;
    if positives == 0 || negatives == 0 {
        Err(StatsError::ConstantOutcome {
            positives,
            negatives,
        })
    } else {
        Ok((positives, negatives))
    }
}

/// Maps a finite `f64` to a `u64` whose unsigned order is the numeric order
/// of the floats, with `-0.0` and `+0.0` mapped to the same key (so they tie,
/// as they compare equal). Sorting `u64` keys is markedly faster than
/// sorting floats through a comparison closure.
#[inline]
fn order_key(x: f64) -> u64 {
    // Normalise -0.0 to +0.0.
    let x = if x == 0.0 { 0.0 } else { x };
    let bits = x.to_bits();
    if bits >> 63 == 1 {
        !bits
    } else {
        bits | (1 << 63)
    }
}

/// Inverse of [`order_key`] (used in tests).
#[cfg(test)]
fn key_value(key: u64) -> f64 {
    if key >> 63 == 1 {
        f64::from_bits(key & !(1 << 63))
    } else {
        f64::from_bits(!key)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn order_key_preserves_order_and_ties_signed_zeros() {
        let xs = [
            -f64::MAX,
            -1e300,
            -2.5,
            -1.0,
            -f64::MIN_POSITIVE,
            -5e-324,
            0.0,
            5e-324,
            f64::MIN_POSITIVE,
            1.0,
            2.5,
            1e300,
            f64::MAX,
        ];
        for w in xs.windows(2) {
            assert!(order_key(w[0]) < order_key(w[1]), "{} vs {}", w[0], w[1]);
        }
        assert_eq!(order_key(-0.0), order_key(0.0));
        for &x in &xs {
            assert_eq!(key_value(order_key(x)), x);
        }
    }

    #[test]
    fn error_messages_are_informative() {
        let e = StatsError::ConstantOutcome {
            positives: 0,
            negatives: 12,
        };
        assert!(e.to_string().contains("no positive units among 12"));
        let e = StatsError::ConstantOutcome {
            positives: 3,
            negatives: 0,
        };
        assert!(e.to_string().contains("no negative units among 3"));
        let e = StatsError::LengthMismatch {
            what: "outcome".into(),
            expected: 5,
            found: 4,
        };
        assert_eq!(
            e.to_string(),
            "length mismatch: outcome has 4 values but 5 were expected"
        );
        let e = StatsError::ConstantPredictor {
            name: "hiv".into(),
            value: 0.0,
        };
        assert!(e
            .to_string()
            .contains("'hiv' is constant (every value is 0)"));
        // Usable as a boxed std error.
        let boxed: Box<dyn std::error::Error> =
            Box::new(StatsError::NotConverged { iterations: 50 });
        assert!(boxed.to_string().contains("50 iterations"));
    }
}
