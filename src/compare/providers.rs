//! Providers (`--by COL`): indirectly standardised ratios of observed over
//! expected events per provider under each index specification, their
//! exact Poisson intervals, funnel-plot limits, over-dispersion, and how
//! far the providers' standing agrees between specifications.
//!
//! * Expected E: the sum over the provider's units of the fitted
//!   probabilities of the specification's logistic model (outcome on the
//!   score plus the adjustment terms, fitted on every analysed unit).
//! * Interval of O/E: exact Poisson limits for O (Garwood F. Biometrika
//!   1936;28:437-42; Ulm K. Am J Epidemiol 1990;131:373-5) divided by E.
//! * Funnel limits at 95% and 99.8%: Poisson(E) quantiles with the
//!   interpolation of Spiegelhalter DJ. Stat Med 2005;24:1185-1202
//!   ([`stats::funnel_limit`]).
//! * Over-dispersion: Spiegelhalter DJ. Handling over-dispersion of
//!   performance indicators. Qual Saf Health Care 2005;14:347-51:
//!   z = (O − E)/√E, Winsorised at the 10th and 90th percentiles; φ the
//!   mean of the squared Winsorised z; multiplicative limits 1 ± z_p √(φ/E)
//!   (when φ > 1), additive (random-effects) limits 1 ± z_p √(1/E + τ²)
//!   with τ² = (Iφ − (I − 1)) / (Σw − Σw²/Σw), w = E (when positive).

use serde::Serialize;

use crate::stats;

/// Probabilities of the two funnel levels: (lower, upper).
const LEVELS: [(f64, f64); 2] = [(0.025, 0.975), (0.001, 0.999)];
/// Share Winsorised in each tail of the z-scores (Spiegelhalter 2005, QSHC).
pub const WINSOR_SHARE: f64 = 0.1;
/// Most providers `--by` accepts.
pub const MAX_PROVIDERS: usize = 20_000;

/// How funnel limits allow for over-dispersion.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Overdispersion {
    /// Limits widened by √φ.
    Multiplicative,
    /// A between-provider variance τ² added (random effects).
    Additive,
}

impl Overdispersion {
    pub fn parse(s: &str) -> Option<Overdispersion> {
        match s {
            "multiplicative" => Some(Overdispersion::Multiplicative),
            "additive" => Some(Overdispersion::Additive),
            _ => None,
        }
    }
}

/// Where a provider's ratio lies against a pair of limits.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Position {
    /// Below the lower limit: fewer events than expected.
    Under,
    /// Between the limits (inclusive).
    Inside,
    /// Above the upper limit: more events than expected.
    Over,
    /// Expected count below the stated minimum: listed, not judged.
    NotJudged,
}

impl Position {
    pub fn word(self) -> &'static str {
        match self {
            Position::Under => "under",
            Position::Inside => "inside",
            Position::Over => "over",
            Position::NotJudged => "not judged",
        }
    }
}

/// The providers' results, in the JSON as `providers`.
#[derive(Clone, Debug, Serialize)]
pub struct Providers {
    /// The `--by` column.
    pub column: String,
    /// Providers whose expected count is below this are listed, not judged.
    pub min_expected: f64,
    /// `null` (exact Poisson limits), `multiplicative` or `additive`.
    pub overdispersion: Option<Overdispersion>,
    /// Analysed units with no value in the `--by` column (in the models,
    /// in no provider).
    pub units_without_provider: u64,
    /// Provider names in output order (byte order).
    pub names: Vec<String>,
    /// Per provider: analysed units.
    pub units: Vec<u64>,
    /// Per provider: observed events (the same under every specification).
    pub observed: Vec<u64>,
    /// One entry per specification with a model, in index order.
    pub specifications: Vec<ProviderSpec>,
    /// Per pair of specifications (as `pairs`).
    pub agreement: Vec<Agreement>,
    /// Providers judged under every specification whose 99.8% position is
    /// not the same under all of them.
    pub changes: Vec<Change>,
    pub notes: Vec<String>,
}

/// One specification's view of the providers.
#[derive(Clone, Debug, Serialize)]
pub struct ProviderSpec {
    pub index: String,
    /// In the order of [`Providers::names`].
    pub providers: Vec<ProviderRow>,
    /// With `--overdispersion`.
    pub dispersion: Option<Dispersion>,
    /// Control limits on the ratio against the expected count, for drawing.
    pub funnel: Vec<FunnelPoint>,
    /// Counts of positions at 99.8%: under, inside, over, not judged.
    pub positions_998: [u64; 4],
}

#[derive(Clone, Debug, Serialize)]
pub struct ProviderRow {
    pub expected: f64,
    /// O/E; `null` when E is 0.
    pub ratio: Option<f64>,
    /// Exact Poisson 95% interval of O/E.
    pub ci95: Option<[f64; 2]>,
    /// Control limits on the ratio at this E: 95%.
    pub limits95: Option<[f64; 2]>,
    /// 99.8%.
    pub limits998: Option<[f64; 2]>,
    pub position95: Position,
    pub position998: Position,
}

#[derive(Clone, Debug, Serialize)]
pub struct FunnelPoint {
    pub expected: f64,
    pub limits95: [f64; 2],
    pub limits998: [f64; 2],
}

/// Over-dispersion of a specification's ratios (Spiegelhalter 2005, QSHC).
#[derive(Clone, Debug, Serialize)]
pub struct Dispersion {
    /// Judged providers the estimate uses.
    pub providers: usize,
    /// φ: mean squared Winsorised z-score.
    pub phi: f64,
    /// P(χ²(I − 1) > Iφ): a test of no over-dispersion.
    pub p_value: Option<f64>,
    /// τ², the between-provider variance of the additive model (0 when
    /// Iφ ≤ I − 1).
    pub tau2: f64,
    /// Whether the limits were widened (φ > 1 multiplicative, τ² > 0 additive).
    pub widened: bool,
}

#[derive(Clone, Debug, Serialize)]
pub struct Agreement {
    pub a: String,
    pub b: String,
    /// Spearman's ρ of the ratios over the providers judged under both.
    pub spearman: Option<f64>,
    /// Providers judged under both whose 99.8% position differs.
    pub position_changes: u64,
    /// Providers judged under both.
    pub judged: u64,
    /// The largest |ratio(a) − ratio(b)| and its provider.
    pub largest_change: Option<LargestChange>,
}

#[derive(Clone, Debug, Serialize)]
pub struct LargestChange {
    pub provider: String,
    pub ratio_a: f64,
    pub ratio_b: f64,
}

#[derive(Clone, Debug, Serialize)]
pub struct Change {
    pub provider: String,
    /// One per specification, in the order of `specifications`.
    pub positions: Vec<Position>,
    pub ratios: Vec<Option<f64>>,
}

/// Input: per analysed unit its provider (an index into `names`) or none.
pub(crate) struct ProviderInput<'a> {
    pub column: String,
    pub names: Vec<String>,
    pub of_unit: &'a [Option<u32>],
    pub min_expected: f64,
    pub overdispersion: Option<Overdispersion>,
}

fn position(ratio: Option<f64>, limits: Option<[f64; 2]>, judged: bool) -> Position {
    match (judged, ratio, limits) {
        (true, Some(r), Some([lo, hi])) => {
            if r < lo {
                Position::Under
            } else if r > hi {
                Position::Over
            } else {
                Position::Inside
            }
        }
        _ => Position::NotJudged,
    }
}

/// Type-7 quantile of sorted values.
fn quantile(sorted: &[f64], p: f64) -> f64 {
    let h = (sorted.len() - 1) as f64 * p;
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(sorted.len() - 1);
    sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
}

/// φ and τ² from the judged providers' (O, E) (Spiegelhalter 2005, QSHC).
pub fn dispersion(oe: &[(f64, f64)], method: Overdispersion) -> Option<Dispersion> {
    let i = oe.len();
    if i < 2 {
        return None;
    }
    let z: Vec<f64> = oe.iter().map(|&(o, e)| (o - e) / e.sqrt()).collect();
    let mut sorted = z.clone();
    sorted.sort_by(f64::total_cmp);
    let lo = quantile(&sorted, WINSOR_SHARE);
    let hi = quantile(&sorted, 1.0 - WINSOR_SHARE);
    let phi = z.iter().map(|&v| v.clamp(lo, hi).powi(2)).sum::<f64>() / i as f64;
    let nf = i as f64;
    let p_value = stats::chi_square_sf(nf * phi, nf - 1.0).ok();
    let sw: f64 = oe.iter().map(|&(_, e)| e).sum();
    let sw2: f64 = oe.iter().map(|&(_, e)| e * e).sum();
    let denom = sw - sw2 / sw;
    let tau2 = if nf * phi > nf - 1.0 && denom > 0.0 {
        (nf * phi - (nf - 1.0)) / denom
    } else {
        0.0
    };
    let widened = match method {
        Overdispersion::Multiplicative => phi > 1.0,
        Overdispersion::Additive => tau2 > 0.0,
    };
    Some(Dispersion {
        providers: i,
        phi,
        p_value,
        tau2,
        widened,
    })
}

/// Limits (95%, 99.8%) on the ratio at expected count `e`.
fn limits_at(e: f64, d: Option<(&Dispersion, Overdispersion)>) -> Option<[[f64; 2]; 2]> {
    if e.is_nan() || e <= 0.0 {
        return None;
    }
    let mut out = [[0.0; 2]; 2];
    for (k, &(pl, pu)) in LEVELS.iter().enumerate() {
        out[k] = match d {
            Some((d, m)) if d.widened => {
                let z = stats::normal_quantile(pu).ok()?;
                let sd = match m {
                    Overdispersion::Multiplicative => (d.phi / e).sqrt(),
                    Overdispersion::Additive => (1.0 / e + d.tau2).sqrt(),
                };
                [(1.0 - z * sd).max(0.0), 1.0 + z * sd]
            }
            _ => [
                stats::funnel_limit(e, pl).ok()?,
                stats::funnel_limit(e, pu).ok()?,
            ],
        };
    }
    Some(out)
}

/// The providers' results. `fitted[s]`: the specification's name and its
/// fitted probabilities per analysed unit (`None`: no model). `pairs`: the
/// pairs of specification positions to compare (as `pairs`).
pub(crate) fn providers(
    input: &ProviderInput<'_>,
    y: &[bool],
    fitted: &[(String, Option<Vec<f64>>)],
    pairs: &[(usize, usize)],
) -> Providers {
    let np = input.names.len();
    let mut units = vec![0u64; np];
    let mut observed = vec![0u64; np];
    let mut without = 0u64;
    for (u, p) in input.of_unit.iter().enumerate() {
        match p {
            Some(p) => {
                units[*p as usize] += 1;
                observed[*p as usize] += y[u] as u64;
            }
            None => without += 1,
        }
    }
    let mut notes = Vec::new();
    let mut specs: Vec<ProviderSpec> = Vec::new();
    let mut spec_of: Vec<Option<usize>> = Vec::new();
    for (name, probs) in fitted {
        let Some(probs) = probs else {
            notes.push(format!(
                "{name}: no model, so no expected counts; left out of the providers' results"
            ));
            spec_of.push(None);
            continue;
        };
        let mut expected = vec![0.0f64; np];
        for (u, p) in input.of_unit.iter().enumerate() {
            if let Some(p) = p {
                expected[*p as usize] += probs[u];
            }
        }
        let judged: Vec<bool> = expected
            .iter()
            .map(|&e| e >= input.min_expected && e > 0.0)
            .collect();
        let disp = input.overdispersion.and_then(|m| {
            let oe: Vec<(f64, f64)> = (0..np)
                .filter(|&p| judged[p])
                .map(|p| (observed[p] as f64, expected[p]))
                .collect();
            dispersion(&oe, m).map(|d| (d, m))
        });
        let dref = disp.as_ref().map(|(d, m)| (d, *m));
        let mut rows = Vec::with_capacity(np);
        let mut counts = [0u64; 4];
        for p in 0..np {
            let e = expected[p];
            let o = observed[p];
            let ratio = (e > 0.0).then(|| o as f64 / e);
            let ci95 = if e > 0.0 {
                stats::poisson_exact_limits(o, 0.05)
                    .ok()
                    .map(|(lo, hi)| [lo / e, hi / e])
            } else {
                None
            };
            let lim = limits_at(e, dref);
            let row = ProviderRow {
                expected: e,
                ratio,
                ci95,
                limits95: lim.map(|l| l[0]),
                limits998: lim.map(|l| l[1]),
                position95: position(ratio, lim.map(|l| l[0]), judged[p]),
                position998: position(ratio, lim.map(|l| l[1]), judged[p]),
            };
            counts[match row.position998 {
                Position::Under => 0,
                Position::Inside => 1,
                Position::Over => 2,
                Position::NotJudged => 3,
            }] += 1;
            rows.push(row);
        }
        spec_of.push(Some(specs.len()));
        specs.push(ProviderSpec {
            index: name.clone(),
            providers: rows,
            dispersion: disp.map(|(d, _)| d),
            funnel: Vec::new(),
            positions_998: counts,
        });
    }
    // Funnel curves over the range of expected counts of every specification.
    let (mut emin, mut emax) = (f64::INFINITY, 0.0f64);
    for s in &specs {
        for r in &s.providers {
            if r.expected > 0.0 {
                emin = emin.min(r.expected);
                emax = emax.max(r.expected);
            }
        }
    }
    if emax > 0.0 {
        let lo = (emin * 0.8).max(input.min_expected.max(0.5) * 0.5);
        let hi = emax * 1.2;
        let steps = 80;
        for s in &mut specs {
            let d = s.dispersion.clone();
            let dref = d.as_ref().zip(input.overdispersion);
            s.funnel = (0..=steps)
                .filter_map(|k| {
                    let e = lo * (hi / lo).powf(k as f64 / steps as f64);
                    limits_at(e, dref).map(|l| FunnelPoint {
                        expected: e,
                        limits95: l[0],
                        limits998: l[1],
                    })
                })
                .collect();
        }
    }
    // Agreement between specifications.
    let mut agreement = Vec::new();
    for &(a, b) in pairs {
        let (Some(sa), Some(sb)) = (spec_of[a], spec_of[b]) else {
            continue;
        };
        let (ra, rb) = (&specs[sa].providers, &specs[sb].providers);
        let both: Vec<usize> = (0..np)
            .filter(|&p| {
                ra[p].position998 != Position::NotJudged && rb[p].position998 != Position::NotJudged
            })
            .collect();
        let xa: Vec<f64> = both.iter().filter_map(|&p| ra[p].ratio).collect();
        let xb: Vec<f64> = both.iter().filter_map(|&p| rb[p].ratio).collect();
        let spearman = (xa.len() >= 2)
            .then(|| stats::spearman(&xa, &xb).ok())
            .flatten();
        let position_changes = both
            .iter()
            .filter(|&&p| ra[p].position998 != rb[p].position998)
            .count() as u64;
        let largest_change = both
            .iter()
            .filter_map(|&p| Some((p, ra[p].ratio?, rb[p].ratio?)))
            .max_by(|x, y| (x.1 - x.2).abs().total_cmp(&(y.1 - y.2).abs()))
            .map(|(p, x, y)| LargestChange {
                provider: input.names[p].clone(),
                ratio_a: x,
                ratio_b: y,
            });
        agreement.push(Agreement {
            a: specs[sa].index.clone(),
            b: specs[sb].index.clone(),
            spearman,
            position_changes,
            judged: both.len() as u64,
            largest_change,
        });
    }
    // Providers whose 99.8% position is not the same under every specification.
    let mut changes = Vec::new();
    for p in 0..np {
        let pos: Vec<Position> = specs.iter().map(|s| s.providers[p].position998).collect();
        if pos.contains(&Position::NotJudged) {
            continue;
        }
        if pos.iter().any(|&x| x != pos[0]) {
            changes.push(Change {
                provider: input.names[p].clone(),
                positions: pos,
                ratios: specs.iter().map(|s| s.providers[p].ratio).collect(),
            });
        }
    }
    let unjudged = (0..np)
        .filter(|&p| {
            specs
                .iter()
                .any(|s| s.providers[p].position998 == Position::NotJudged)
        })
        .count();
    if unjudged > 0 {
        notes.push(format!(
            "{unjudged} of {np} providers have an expected count below {} under at least one \
             specification: listed with their ratios, not judged against the limits and left \
             out of the agreement figures",
            super::fmt_num(input.min_expected)
        ));
    }
    if without > 0 {
        notes.push(format!(
            "{} analysed units have no value in '{}': they are in the models but in no provider",
            super::fmt_count(without),
            input.column
        ));
    }
    Providers {
        column: input.column.clone(),
        min_expected: input.min_expected,
        overdispersion: input.overdispersion,
        units_without_provider: without,
        names: input.names.clone(),
        units,
        observed,
        specifications: specs,
        agreement,
        changes,
        notes,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn positions_against_limits() {
        assert_eq!(position(Some(0.5), Some([0.6, 1.4]), true), Position::Under);
        assert_eq!(
            position(Some(1.4), Some([0.6, 1.4]), true),
            Position::Inside
        );
        assert_eq!(position(Some(1.5), Some([0.6, 1.4]), true), Position::Over);
        assert_eq!(
            position(Some(1.5), Some([0.6, 1.4]), false),
            Position::NotJudged
        );
    }

    #[test]
    fn dispersion_hand_worked() {
        // Ten providers with E = 100 and O = 100 + 10k (k = -4..5): z = k,
        // Winsorised at the type-7 10th and 90th percentiles of -4..5
        // (-3.1 and 4.1): phi = (3.1² + 3² + 2² + 1² + 0 + 1 + 4 + 9 + 16 + 4.1²)/10.
        let oe: Vec<(f64, f64)> = (-4..=5).map(|k| (100.0 + 10.0 * k as f64, 100.0)).collect();
        let d = dispersion(&oe, Overdispersion::Multiplicative).unwrap();
        let want =
            (3.1f64.powi(2) + 9.0 + 4.0 + 1.0 + 0.0 + 1.0 + 4.0 + 9.0 + 16.0 + 4.1f64.powi(2))
                / 10.0;
        assert!((d.phi - want).abs() < 1e-12, "{} {want}", d.phi);
        assert!(d.widened);
        // tau² = (I phi - (I - 1)) / (sum w - sum w² / sum w), w = E = 100.
        let tau2 = (10.0 * want - 9.0) / (1000.0 - 100_000.0 / 1000.0);
        assert!((d.tau2 - tau2).abs() < 1e-12);
        // Multiplicative limits at E = 100, 95%: 1 ± 1.959964 sqrt(phi/100).
        let l = limits_at(100.0, Some((&d, Overdispersion::Multiplicative))).unwrap();
        let half = 1.959_963_984_540_054 * (want / 100.0).sqrt();
        assert!((l[0][1] - (1.0 + half)).abs() < 1e-12);
        // No over-dispersion: every O = E gives phi = 0 and the Poisson limits.
        let d = dispersion(&[(10.0, 10.0), (20.0, 20.0)], Overdispersion::Additive).unwrap();
        assert_eq!((d.phi, d.tau2, d.widened), (0.0, 0.0, false));
    }
}
