//! Out-of-sample performance (`--folds K`): K-fold cross-validation with
//! folds formed by `--id` (all of a patient's episodes in one fold), seeded
//! and reproducible.
//!
//! Each specification's model (outcome on the score plus the adjustment
//! terms) is fitted K times, each time without one fold, and predicts that
//! fold. From the pooled out-of-fold linear predictors η:
//!
//! * c-statistic (pooled, and per fold);
//! * calibration intercept (calibration-in-the-large): α in
//!   logit P(y) = α + η (η as an offset);
//! * calibration slope: β in logit P(y) = α + βη (Cox DR. Biometrika
//!   1958;45:562-5; see Van Calster B et al. J Clin Epidemiol
//!   2016;74:167-76);
//! * Brier score: mean (y − p)²;
//! * calibration by tenths of predicted risk: units ordered by p and cut
//!   into ten groups of (nearly) equal size, mean p against the observed
//!   share.

use serde::Serialize;

use crate::stats::{self, StatsError};

/// Most folds `--folds` accepts.
pub const MAX_FOLDS: usize = 20;

/// Out-of-sample figures of one specification.
#[derive(Clone, Debug, Serialize)]
pub struct OutOfSample {
    /// c-statistic of the pooled out-of-fold predictions.
    pub c_statistic: Option<f64>,
    /// Mean of the per-fold c-statistics.
    pub c_statistic_mean_of_folds: Option<f64>,
    pub calibration_intercept: Option<f64>,
    pub calibration_slope: Option<f64>,
    pub brier: f64,
    pub folds: Vec<FoldResult>,
    /// Ten groups by predicted risk, lowest first.
    pub calibration: Vec<CalibrationGroup>,
    pub notes: Vec<String>,
}

#[derive(Clone, Debug, Serialize)]
pub struct FoldResult {
    pub fold: usize,
    pub units: usize,
    pub events: usize,
    /// `null` when the fold holds one outcome only.
    pub c_statistic: Option<f64>,
    pub brier: f64,
}

#[derive(Clone, Debug, Serialize)]
pub struct CalibrationGroup {
    pub units: usize,
    pub mean_predicted: f64,
    pub observed_share: f64,
}

/// The fold of every unit: groups (by `group_of`, one per distinct value;
/// `None` a group of its own) in order of first appearance, shuffled with
/// `seed` (SplitMix64 and Fisher–Yates), dealt round-robin into `k` folds.
pub fn assign_folds(group_of: &[Option<u32>], k: usize, seed: u64) -> Vec<u32> {
    // Group numbers: given ones first, then one per unit without a group.
    let given = group_of
        .iter()
        .flatten()
        .max()
        .map_or(0, |&m| m as usize + 1);
    let mut group = Vec::with_capacity(group_of.len());
    let mut next = given;
    for g in group_of {
        group.push(match g {
            Some(g) => *g as usize,
            None => {
                next += 1;
                next - 1
            }
        });
    }
    let mut order: Vec<usize> = (0..next).collect();
    let mut state = seed;
    let mut rand = move || {
        state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = state;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    };
    for i in (1..order.len()).rev() {
        let j = (rand() % (i as u64 + 1)) as usize;
        order.swap(i, j);
    }
    let mut fold_of_group = vec![0u32; next];
    for (pos, &g) in order.iter().enumerate() {
        fold_of_group[g] = (pos % k) as u32;
    }
    group.iter().map(|&g| fold_of_group[g]).collect()
}

/// α maximising Σ y(α + o) − log(1 + e^{α + o}) (an intercept with offset o).
pub fn intercept_with_offset(y: &[bool], offset: &[f64]) -> Result<f64, StatsError> {
    let mut a = 0.0;
    for _ in 0..100 {
        let (mut g, mut h) = (0.0, 0.0);
        for (&yi, &o) in y.iter().zip(offset) {
            let p = 1.0 / (1.0 + (-(a + o)).exp());
            g += yi as u8 as f64 - p;
            h += p * (1.0 - p);
        }
        if h.is_nan() || h <= 0.0 {
            return Err(StatsError::Separation {
                detail: "the calibration intercept has no finite estimate".into(),
            });
        }
        let step = g / h;
        a += step.clamp(-5.0, 5.0);
        if step.abs() < 1e-12 {
            return Ok(a);
        }
    }
    Err(StatsError::NotConverged { iterations: 100 })
}

fn brier(y: &[bool], p: &[f64]) -> f64 {
    y.iter()
        .zip(p)
        .map(|(&yi, &pi)| (yi as u8 as f64 - pi).powi(2))
        .sum::<f64>()
        / y.len().max(1) as f64
}

/// The figures from the pooled out-of-fold linear predictors `eta` (one per
/// unit) and the folds.
pub fn evaluate(y: &[bool], eta: &[f64], fold: &[u32], k: usize) -> OutOfSample {
    let p: Vec<f64> = eta.iter().map(|&e| 1.0 / (1.0 + (-e).exp())).collect();
    let mut notes = Vec::new();
    let c_statistic = stats::auc(eta, y).ok();
    let calibration_intercept = match intercept_with_offset(y, eta) {
        Ok(a) => Some(a),
        Err(e) => {
            notes.push(format!("no calibration intercept: {e}"));
            None
        }
    };
    let calibration_slope = match stats::logistic(y, &[eta.to_vec()], &["eta".to_string()]) {
        Ok(f) => Some(f.coefficients[1].estimate),
        Err(e) => {
            notes.push(format!("no calibration slope: {e}"));
            None
        }
    };
    let mut folds = Vec::with_capacity(k);
    for f in 0..k {
        let idx: Vec<usize> = (0..y.len()).filter(|&u| fold[u] == f as u32).collect();
        let fy: Vec<bool> = idx.iter().map(|&u| y[u]).collect();
        let fe: Vec<f64> = idx.iter().map(|&u| eta[u]).collect();
        let fp: Vec<f64> = idx.iter().map(|&u| p[u]).collect();
        folds.push(FoldResult {
            fold: f + 1,
            units: idx.len(),
            events: fy.iter().filter(|&&v| v).count(),
            c_statistic: stats::auc(&fe, &fy).ok(),
            brier: brier(&fy, &fp),
        });
    }
    let cs: Vec<f64> = folds.iter().filter_map(|f| f.c_statistic).collect();
    let c_statistic_mean_of_folds = (cs.len() == k).then(|| cs.iter().sum::<f64>() / k as f64);
    if cs.len() < k {
        notes.push(format!(
            "{} of {k} folds hold units of one outcome only: no c-statistic for them and no mean over folds",
            k - cs.len()
        ));
    }
    // Ten groups of nearly equal size by predicted risk.
    // Ties in order of the units (as a stable sort would leave them).
    let mut order: Vec<usize> = (0..y.len()).collect();
    order.sort_unstable_by(|&a, &b| eta[a].total_cmp(&eta[b]).then(a.cmp(&b)));
    let n = y.len();
    let mut calibration = Vec::new();
    for g in 0..10 {
        let (s, e) = (g * n / 10, (g + 1) * n / 10);
        if e <= s {
            continue;
        }
        let units = e - s;
        let mp = order[s..e].iter().map(|&u| p[u]).sum::<f64>() / units as f64;
        let obs = order[s..e].iter().filter(|&&u| y[u]).count() as f64 / units as f64;
        calibration.push(CalibrationGroup {
            units,
            mean_predicted: mp,
            observed_share: obs,
        });
    }
    OutOfSample {
        c_statistic,
        c_statistic_mean_of_folds,
        calibration_intercept,
        calibration_slope,
        brier: brier(y, &p),
        folds,
        calibration,
        notes,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn folds_keep_groups_together_and_are_reproducible() {
        let groups: Vec<Option<u32>> = (0..1000).map(|u| Some((u / 3) as u32)).collect();
        let a = assign_folds(&groups, 5, 7);
        assert_eq!(a, assign_folds(&groups, 5, 7));
        assert_ne!(a, assign_folds(&groups, 5, 8));
        for u in 0..1000 {
            assert_eq!(a[u], a[(u / 3) * 3]);
        }
        // 334 groups dealt round-robin: fold sizes in groups differ by at most 1.
        let mut per = [0usize; 5];
        for u in (0..1000).step_by(3) {
            per[a[u] as usize] += 1;
        }
        assert!(
            per.iter().max().unwrap() - per.iter().min().unwrap() <= 1,
            "{per:?}"
        );
        // Units without a group are groups of their own.
        let b = assign_folds(&[None, None, None, None], 2, 1);
        assert_eq!(b.iter().filter(|&&f| f == 0).count(), 2);
    }

    #[test]
    fn intercept_with_offset_is_the_log_odds_correction() {
        // With offset 0 the intercept is the log odds of the outcome:
        // 3 events of 10 gives ln(3/7) (exact).
        let y: Vec<bool> = (0..10).map(|i| i < 3).collect();
        let a = intercept_with_offset(&y, &[0.0; 10]).unwrap();
        assert!((a - (3.0f64 / 7.0).ln()).abs() < 1e-10);
        // A constant offset c shifts it by -c.
        let b = intercept_with_offset(&y, &[0.5; 10]).unwrap();
        assert!((b - (a - 0.5)).abs() < 1e-10);
    }
}
