//! The gamma function's logarithm, the regularised incomplete gamma
//! functions and their inverse; from them the chi-square and Poisson
//! distributions that exact Poisson limits and funnel plots need.
//!
//! * ln Γ(a): Lanczos' approximation (Lanczos C. J SIAM Numer Anal
//!   1964;1:86-96) with g = 7 and nine coefficients, about 15 significant
//!   digits for a > 0.
//! * P(a, x) = γ(a, x)/Γ(a) and Q(a, x) = 1 − P(a, x): the power series for
//!   x < a + 1 and Legendre's continued fraction for Q otherwise (Abramowitz
//!   & Stegun, *Handbook of Mathematical Functions*, 1964, 6.5.29 and
//!   6.5.31), the fraction evaluated with the modified Lentz algorithm.
//!   Each is computed directly in its own tail, so a small P or Q keeps its
//!   relative accuracy.
//! * P⁻¹(a, p): the Wilson–Hilferty start (Wilson EB, Hilferty MM. Proc
//!   Natl Acad Sci USA 1931;17:684-8), then Newton steps inside a bracket
//!   that bisection keeps when a step leaves it.
//!
//! Checked against scipy (`scipy.special.gammainc`, `gammaincc`,
//! `gammaincinv`, `scipy.stats.chi2.ppf`, `scipy.stats.poisson.cdf`) in the
//! tests below.

use super::StatsError;

const LANCZOS_G: f64 = 7.0;
#[allow(clippy::excessive_precision)]
const LANCZOS: [f64; 9] = [
    0.999_999_999_999_809_93,
    676.520_368_121_885_1,
    -1_259.139_216_722_402_8,
    771.323_428_777_653_13,
    -176.615_029_162_140_59,
    12.507_343_278_686_905,
    -0.138_571_095_265_720_12,
    9.984_369_578_019_571_6e-6,
    1.505_632_735_149_311_6e-7,
];

/// ln Γ(a) for a > 0 (NaN otherwise).
pub fn ln_gamma(a: f64) -> f64 {
    if a.is_nan() || a <= 0.0 {
        return f64::NAN;
    }
    if a < 0.5 {
        // Reflection: Γ(a)Γ(1 − a) = π / sin(πa).
        let pi = std::f64::consts::PI;
        return (pi / (pi * a).sin()).ln() - ln_gamma(1.0 - a);
    }
    let x = a - 1.0;
    let mut sum = LANCZOS[0];
    for (k, c) in LANCZOS.iter().enumerate().skip(1) {
        sum += c / (x + k as f64);
    }
    let t = x + LANCZOS_G + 0.5;
    0.5 * (2.0 * std::f64::consts::PI).ln() + (x + 0.5) * t.ln() - t + sum.ln()
}

/// ln(x^a e^{−x} / Γ(a)), the common factor of both expansions.
fn ln_prefactor(a: f64, x: f64) -> f64 {
    a * x.ln() - x - ln_gamma(a)
}

const EPS: f64 = 1e-16;
const MAX_TERMS: usize = 1_000_000;

/// P(a, x) by its series (A&S 6.5.29), best for x < a + 1.
fn p_series(a: f64, x: f64) -> f64 {
    let mut term = 1.0 / a;
    let mut sum = term;
    let mut n = a;
    for _ in 0..MAX_TERMS {
        n += 1.0;
        term *= x / n;
        sum += term;
        if term.abs() < sum.abs() * EPS {
            break;
        }
    }
    (ln_prefactor(a, x) + sum.ln()).exp()
}

/// Q(a, x) by its continued fraction (A&S 6.5.31), best for x ≥ a + 1.
fn q_fraction(a: f64, x: f64) -> f64 {
    let tiny = 1e-300;
    let mut b = x + 1.0 - a;
    let mut c = 1.0 / tiny;
    let mut d = 1.0 / b;
    let mut h = d;
    for i in 1..MAX_TERMS {
        let an = -(i as f64) * (i as f64 - a);
        b += 2.0;
        d = an * d + b;
        if d.abs() < tiny {
            d = tiny;
        }
        c = b + an / c;
        if c.abs() < tiny {
            c = tiny;
        }
        d = 1.0 / d;
        let delta = d * c;
        h *= delta;
        if (delta - 1.0).abs() < EPS {
            break;
        }
    }
    (ln_prefactor(a, x) + h.ln()).exp()
}

fn check(a: f64, x: f64) -> Result<(), StatsError> {
    if !(a > 0.0 && a.is_finite() && x >= 0.0) {
        return Err(StatsError::InvalidArgument(format!(
            "incomplete gamma needs a > 0 and x >= 0, got a = {a}, x = {x}"
        )));
    }
    Ok(())
}

/// The regularised lower incomplete gamma function P(a, x) = γ(a, x)/Γ(a).
///
/// # Errors
/// [`StatsError::InvalidArgument`] unless a > 0 (finite) and x ≥ 0.
///
/// ```
/// use morbus::stats::gamma_p;
/// // P(1, x) = 1 − e^{−x}
/// assert!((gamma_p(1.0, 2.0)? - (1.0 - (-2.0f64).exp())).abs() < 1e-15);
/// # Ok::<(), morbus::stats::StatsError>(())
/// ```
pub fn gamma_p(a: f64, x: f64) -> Result<f64, StatsError> {
    check(a, x)?;
    Ok(if x == 0.0 {
        0.0
    } else if x.is_infinite() {
        1.0
    } else if x < a + 1.0 {
        p_series(a, x)
    } else {
        1.0 - q_fraction(a, x)
    })
}

/// The regularised upper incomplete gamma function Q(a, x) = 1 − P(a, x).
///
/// # Errors
/// As [`gamma_p`].
pub fn gamma_q(a: f64, x: f64) -> Result<f64, StatsError> {
    check(a, x)?;
    Ok(if x == 0.0 {
        1.0
    } else if x.is_infinite() {
        0.0
    } else if x < a + 1.0 {
        1.0 - p_series(a, x)
    } else {
        q_fraction(a, x)
    })
}

/// The x with P(a, x) = p: the p-quantile of a gamma distribution of shape
/// `a` and scale 1.
///
/// # Errors
/// [`StatsError::InvalidArgument`] unless a > 0 and 0 ≤ p < 1 (p = 0
/// gives 0).
pub fn gamma_p_inverse(a: f64, p: f64) -> Result<f64, StatsError> {
    check(a, 0.0)?;
    if !(0.0..1.0).contains(&p) {
        return Err(StatsError::InvalidArgument(format!(
            "inverse incomplete gamma needs 0 <= p < 1, got {p}"
        )));
    }
    if p == 0.0 {
        return Ok(0.0);
    }
    // The residual in the tail where it is computed accurately.
    let upper = p > 0.5;
    let q = 1.0 - p;
    let resid = |x: f64| -> f64 {
        if upper {
            q - gamma_q(a, x).unwrap_or(0.0)
        } else {
            gamma_p(a, x).unwrap_or(1.0) - p
        }
    };
    // Wilson–Hilferty start on the chi-square scale (ν = 2a).
    let z = super::normal_quantile(p)?;
    let nu = 2.0 * a;
    let c = 2.0 / (9.0 * nu);
    let wh = nu * (1.0 - c + z * c.sqrt()).powi(3) / 2.0;
    let mut x = if wh > 0.0 && wh.is_finite() {
        wh
    } else {
        // Small a, lower tail: P(a, x) ≈ x^a / Γ(a + 1).
        ((p.ln() + ln_gamma(a + 1.0)) / a).exp().max(1e-300)
    };
    // A bracket [lo, hi] with resid(lo) < 0 < resid(hi).
    let mut lo = 0.0;
    let mut hi = x.max(1.0);
    while resid(hi) < 0.0 {
        lo = hi;
        hi *= 2.0;
        if !hi.is_finite() {
            return Err(StatsError::InvalidArgument(format!(
                "inverse incomplete gamma: no x with P({a}, x) = {p}"
            )));
        }
    }
    if !(x > lo && x < hi) {
        x = 0.5 * (lo + hi);
    }
    for _ in 0..200 {
        let r = resid(x);
        if r == 0.0 {
            return Ok(x);
        }
        if r < 0.0 {
            lo = x;
        } else {
            hi = x;
        }
        let density = (ln_prefactor(a, x) - x.ln()).exp();
        let mut next = if density > 0.0 && density.is_finite() {
            x - r / density
        } else {
            f64::NAN
        };
        if !(next > lo && next < hi) {
            next = 0.5 * (lo + hi);
        }
        if (next - x).abs() <= 1e-15 * x.abs() || hi - lo <= 1e-15 * hi {
            return Ok(next);
        }
        x = next;
    }
    Ok(x)
}

/// The p-quantile of the chi-square distribution with `df` degrees of
/// freedom: 2 P⁻¹(df/2, p).
///
/// # Errors
/// [`StatsError::InvalidArgument`] unless df > 0 and 0 ≤ p < 1.
///
/// ```
/// use morbus::stats::chi_square_quantile;
/// // scipy.stats.chi2.ppf(0.95, 1) = 3.841458820694124
/// assert!((chi_square_quantile(0.95, 1.0)? - 3.841458820694124).abs() < 1e-12);
/// # Ok::<(), morbus::stats::StatsError>(())
/// ```
pub fn chi_square_quantile(p: f64, df: f64) -> Result<f64, StatsError> {
    Ok(2.0 * gamma_p_inverse(df / 2.0, p)?)
}

/// P(X > x) for X chi-square with `df` degrees of freedom: Q(df/2, x/2).
///
/// # Errors
/// [`StatsError::InvalidArgument`] unless df > 0 and x ≥ 0.
pub fn chi_square_sf(x: f64, df: f64) -> Result<f64, StatsError> {
    gamma_q(df / 2.0, x / 2.0)
}

/// P(O ≤ r) for O Poisson with mean `mean`: Q(r + 1, mean); 0 for r < 0.
///
/// # Errors
/// [`StatsError::InvalidArgument`] for a negative or non-finite mean.
pub fn poisson_cdf(r: i64, mean: f64) -> Result<f64, StatsError> {
    if !(mean >= 0.0 && mean.is_finite()) {
        return Err(StatsError::InvalidArgument(format!(
            "Poisson mean must be finite and >= 0, got {mean}"
        )));
    }
    if r < 0 {
        return Ok(0.0);
    }
    if mean == 0.0 {
        return Ok(1.0);
    }
    gamma_q(r as f64 + 1.0, mean)
}

/// Exact two-sided limits for the mean of a Poisson count `observed`
/// (Garwood F. Biometrika 1936;28:437-42): lower χ²(α/2; 2O)/2 (0 when
/// O = 0), upper χ²(1 − α/2; 2O + 2)/2, for coverage `1 − alpha`.
///
/// ```
/// use morbus::stats::poisson_exact_limits;
/// // scipy: chi2.ppf(0.025, 20)/2, chi2.ppf(0.975, 22)/2
/// let (lo, hi) = poisson_exact_limits(10, 0.05)?;
/// assert!((lo - 4.7953886961324335).abs() < 1e-9 && (hi - 18.39035604201778).abs() < 1e-9);
/// # Ok::<(), morbus::stats::StatsError>(())
/// ```
///
/// # Errors
/// [`StatsError::InvalidArgument`] unless 0 < alpha < 1.
pub fn poisson_exact_limits(observed: u64, alpha: f64) -> Result<(f64, f64), StatsError> {
    if !(alpha > 0.0 && alpha < 1.0) {
        return Err(StatsError::InvalidArgument(format!(
            "alpha must lie in (0, 1), got {alpha}"
        )));
    }
    let o = observed as f64;
    let lo = if observed == 0 {
        0.0
    } else {
        gamma_p_inverse(o, alpha / 2.0)?
    };
    let hi = gamma_p_inverse(o + 1.0, 1.0 - alpha / 2.0)?;
    Ok((lo, hi))
}

/// The funnel-plot control limit on the ratio O/E for a provider with
/// expected count `expected`, at probability `p` of the Poisson
/// distribution with mean E, with the interpolation for discreteness of
/// Spiegelhalter DJ. Funnel plots for institutional comparison. Stat Med
/// 2005;24:1185-1202: r is the smallest integer with P(O ≤ r) ≥ p,
/// a = (P(O ≤ r) − p) / (P(O ≤ r) − P(O ≤ r − 1)), and the limit is
/// (r − a)/E, never below 0.
///
/// # Errors
/// [`StatsError::InvalidArgument`] unless E > 0 (finite) and 0 < p < 1.
pub fn funnel_limit(expected: f64, p: f64) -> Result<f64, StatsError> {
    if !(expected > 0.0 && expected.is_finite() && p > 0.0 && p < 1.0) {
        return Err(StatsError::InvalidArgument(format!(
            "funnel limit needs E > 0 and 0 < p < 1, got E = {expected}, p = {p}"
        )));
    }
    // Start near the normal approximation, then step to the smallest r.
    let z = super::normal_quantile(p)?;
    let mut r = (expected + z * expected.sqrt()).floor().max(0.0) as i64;
    let mut cdf = poisson_cdf(r, expected)?;
    while cdf < p {
        r += 1;
        cdf = poisson_cdf(r, expected)?;
    }
    let mut below = poisson_cdf(r - 1, expected)?;
    while r > 0 && below >= p {
        r -= 1;
        cdf = below;
        below = poisson_cdf(r - 1, expected)?;
    }
    let a = if cdf > below {
        (cdf - p) / (cdf - below)
    } else {
        0.0
    };
    Ok(((r as f64 - a) / expected).max(0.0))
}

// Reference values: scipy 1.x, printed with repr() (17 significant digits).
#[cfg(test)]
#[allow(clippy::excessive_precision)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    #[test]
    fn ln_gamma_matches_known_values() {
        // Γ(n) = (n − 1)!; Γ(1/2) = √π (exact identities).
        assert_relative_eq!(ln_gamma(1.0), 0.0, epsilon = 1e-15);
        assert_relative_eq!(ln_gamma(5.0), 24f64.ln(), max_relative = 1e-14);
        assert_relative_eq!(
            ln_gamma(0.5),
            std::f64::consts::PI.sqrt().ln(),
            max_relative = 1e-14
        );
        // scipy.special.gammaln(1000.5) = 5908.674175848678 (from running scipy)
        assert_relative_eq!(ln_gamma(1000.5), 5908.674175848678, max_relative = 1e-13);
    }

    // (a, x, scipy.special.gammainc(a, x), scipy.special.gammaincc(a, x)),
    // from running scipy 1.x in python/.venv.
    const INCOMPLETE: &[(f64, f64, f64, f64)] = &[
        (0.5, 0.1, 0.34527915398142317, 0.6547208460185768),
        (1.0, 2.0, 0.8646647167633873, 0.1353352832366127),
        (3.0, 0.5, 0.014387677966970684, 0.9856123220330293),
        (10.0, 3.0, 0.0011024881301154815, 0.9988975118698845),
        (10.0, 25.0, 0.9997785233617512, 0.0002214766382487835),
        (50.5, 49.0, 0.434015302738081, 0.565984697261919),
        (2500.0, 2400.0, 0.021659687865363323, 0.9783403121346367),
        (2500.0, 2650.0, 0.9984041750558652, 0.0015958249441347303),
    ];

    #[test]
    fn incomplete_gamma_matches_scipy() {
        for &(a, x, p, q) in INCOMPLETE {
            assert_relative_eq!(gamma_p(a, x).unwrap(), p, max_relative = 1e-11);
            assert_relative_eq!(gamma_q(a, x).unwrap(), q, max_relative = 1e-11);
        }
        assert!(gamma_p(-1.0, 1.0).is_err());
        assert!(gamma_p(1.0, -1.0).is_err());
    }

    // (p, df, scipy.stats.chi2.ppf(p, df)), from running scipy.
    const CHI2: &[(f64, f64, f64)] = &[
        (0.025, 2.0, 0.05063561596857975),
        (0.975, 2.0, 7.377758908227871),
        (0.001, 6.0, 0.3810667551368064),
        (0.999, 8.0, 26.12448155837614),
        (0.025, 200.0, 162.72798250184627),
        (0.975, 202.0, 243.25358758485277),
        (0.5, 1.0, 0.454936423119572),
        (0.95, 1.0, 3.841458820694124),
    ];

    #[test]
    fn chi_square_quantiles_match_scipy() {
        for &(p, df, want) in CHI2 {
            assert_relative_eq!(
                chi_square_quantile(p, df).unwrap(),
                want,
                max_relative = 1e-11
            );
        }
    }

    #[test]
    fn poisson_cdf_matches_scipy() {
        // scipy.stats.poisson.cdf(r, mu), from running scipy.
        assert_relative_eq!(
            poisson_cdf(3, 2.5).unwrap(),
            0.7575761331330662,
            max_relative = 1e-12
        );
        assert_relative_eq!(
            poisson_cdf(0, 0.3).unwrap(),
            0.740818220681718,
            max_relative = 1e-12
        );
        assert_eq!(poisson_cdf(-1, 2.0).unwrap(), 0.0);
    }

    #[test]
    fn garwood_limits_match_scipy_chi_square() {
        // scipy.stats.chi2.ppf(0.025, 2*O)/2 and chi2.ppf(0.975, 2*O+2)/2.
        let (lo, hi) = poisson_exact_limits(0, 0.05).unwrap();
        assert_eq!(lo, 0.0);
        assert_relative_eq!(hi, 3.6888794541139354, max_relative = 1e-11);
        let (lo, hi) = poisson_exact_limits(100, 0.05).unwrap();
        assert_relative_eq!(lo, 81.36399125092314, max_relative = 1e-11);
        assert_relative_eq!(hi, 121.62679379242638, max_relative = 1e-11);
    }

    #[test]
    fn funnel_limit_hand_worked() {
        // Hand-worked with E = 4, p = 0.975. Poisson(4): P(O <= 7) =
        // 0.9488664..., P(O <= 8) = 0.9786365... so r = 8 and
        // a = (0.9786365 - 0.975)/(0.9786365 - 0.9488664) = 0.12215...;
        // the limit is (8 - 0.12215)/4 = 1.96946...
        let p7: f64 = (0..=7)
            .map(|k| (-4f64).exp() * 4f64.powi(k) / (1..=k).map(f64::from).product::<f64>())
            .sum();
        let p8 = p7 + (-4f64).exp() * 4f64.powi(8) / 40320.0;
        let a = (p8 - 0.975) / (p8 - p7);
        assert!(p7 < 0.975 && p8 >= 0.975);
        assert_relative_eq!(
            funnel_limit(4.0, 0.975).unwrap(),
            (8.0 - a) / 4.0,
            max_relative = 1e-12
        );
        // The same from scipy.stats.poisson.cdf (7 and 8 at mean 4), from running scipy.
        assert_relative_eq!(
            funnel_limit(4.0, 0.975).unwrap(),
            1.9694613422506952,
            max_relative = 1e-12
        );
        // Lower limit at E = 4, p = 0.025: P(O <= 0) = e^-4 = 0.0183,
        // P(O <= 1) = 5 e^-4 = 0.0916: r = 1, a = (0.0916 - 0.025)/(0.0916 - 0.0183).
        let e = (-4f64).exp();
        let a = (5.0 * e - 0.025) / (5.0 * e - e);
        assert_relative_eq!(
            funnel_limit(4.0, 0.025).unwrap(),
            (1.0 - a) / 4.0,
            max_relative = 1e-12
        );
        // r = 0: the limit is clipped at 0.
        assert_eq!(funnel_limit(0.5, 0.001).unwrap(), 0.0);
        // Large E: close to the normal approximation 1 + z/sqrt(E).
        let l = funnel_limit(10_000.0, 0.999).unwrap();
        assert!((l - (1.0 + 3.090232306167813 / 100.0)).abs() < 2e-4, "{l}");
    }
}
