//! Paired bootstrap confidence intervals for the difference between two
//! configurations run on the same questions (Efron and Tibshirani 1993,
//! percentile interval; paired as in Koehn 2004 for machine translation):
//! questions are drawn with replacement, both configurations' statistic is
//! computed on the same draw, and the 2.5th and 97.5th percentiles of the
//! differences bound the 95% interval.
//!
//! invariant: the same seed and inputs give the same interval.

use super::Rng;
use super::metrics::quantile;
use serde::{Deserialize, Serialize};

/// Resamples drawn by default.
pub const RESAMPLES: usize = 1000;
/// Seed used unless another is given.
pub const SEED: u64 = 20_240_601;

/// B − A on all questions, with its 95% interval.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Interval {
    pub diff: f64,
    pub low: f64,
    pub high: f64,
}

impl Interval {
    /// Whether the interval leaves out zero: B differs from A beyond the
    /// noise of this question set.
    pub fn excludes_zero(&self) -> bool {
        self.low > 0.0 || self.high < 0.0
    }
}

/// `stat` gets a sample of question indices (with repeats) and returns
/// (A's value, B's value) on it, or `None` when the statistic is not
/// defined on that sample (such draws are skipped). `None` when it is not
/// defined on the whole set.
pub fn paired(
    n: usize,
    resamples: usize,
    seed: u64,
    stat: impl Fn(&[usize]) -> Option<(f64, f64)>,
) -> Option<Interval> {
    paired_many(n, resamples, seed, 1, |idx| vec![stat(idx)]).remove(0)
}

/// [`paired`] for `k` statistics at once, computed together on each draw
/// (every statistic sees the same draws): `stat` returns one value pair,
/// or `None`, per statistic.
pub fn paired_many(
    n: usize,
    resamples: usize,
    seed: u64,
    k: usize,
    stat: impl Fn(&[usize]) -> Vec<Option<(f64, f64)>>,
) -> Vec<Option<Interval>> {
    let all: Vec<usize> = (0..n).collect();
    let whole = stat(&all);
    let mut rng = Rng::new(seed, n, resamples);
    let mut diffs: Vec<Vec<f64>> = vec![Vec::with_capacity(resamples); k];
    let mut draw = vec![0; n];
    for _ in 0..resamples {
        for d in draw.iter_mut() {
            *d = rng.below(n);
        }
        for (i, v) in stat(&draw).into_iter().enumerate().take(k) {
            if let Some((x, y)) = v {
                diffs[i].push(y - x);
            }
        }
    }
    (0..k)
        .map(|i| {
            let (a, b) = whole.get(i).copied().flatten()?;
            let d = &diffs[i];
            (!d.is_empty()).then(|| Interval {
                diff: b - a,
                low: quantile(d, 0.025),
                high: quantile(d, 0.975),
            })
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn mean(xs: &[f64], idx: &[usize]) -> f64 {
        idx.iter().map(|&i| xs[i]).sum::<f64>() / idx.len() as f64
    }

    #[test]
    fn identical_configurations_differ_by_nothing() {
        let a = [0.1, 0.9, 0.5, 0.3, 0.7, 0.2, 0.8];
        let i = paired(a.len(), RESAMPLES, SEED, |s| {
            Some((mean(&a, s), mean(&a, s)))
        })
        .unwrap();
        assert_eq!((i.diff, i.low, i.high), (0.0, 0.0, 0.0));
        assert!(!i.excludes_zero());
    }

    #[test]
    fn seeded_and_deterministic() {
        let a = [0.11, 0.93, 0.02, 0.71, 0.64, 0.25, 0.08, 0.87, 0.33, 0.59];
        let b = [0.71, 0.97, 0.12, 0.88, 0.64, 0.61, 0.28, 0.93, 0.48, 0.69];
        let run = |seed| {
            paired(a.len(), RESAMPLES, seed, |s| {
                Some((mean(&a, s), mean(&b, s)))
            })
        };
        assert_eq!(run(SEED), run(SEED));
        assert_ne!(run(SEED), run(SEED + 1));
        let i = run(SEED).unwrap();
        assert!((i.diff - 0.178).abs() < 1e-9, "{i:?}");
        assert!(i.low <= i.diff && i.diff <= i.high, "{i:?}");
    }

    /// A large, consistent improvement is beyond noise; a coin-flip one is not.
    #[test]
    fn clear_gains_are_told_from_noise() {
        let n = 60;
        let a: Vec<f64> = (0..n).map(|i| f64::from(u8::from(i % 4 == 0))).collect();
        let better: Vec<f64> = (0..n).map(|i| f64::from(u8::from(i % 4 != 3))).collect();
        let noisy: Vec<f64> = (0..n).map(|i| f64::from(u8::from(i % 4 == 1))).collect();
        let clear = paired(n, RESAMPLES, SEED, |s| {
            Some((mean(&a, s), mean(&better, s)))
        })
        .unwrap();
        assert!(clear.excludes_zero(), "{clear:?}");
        let same = paired(n, RESAMPLES, SEED, |s| Some((mean(&a, s), mean(&noisy, s)))).unwrap();
        assert!(!same.excludes_zero(), "{same:?}");
    }
}
