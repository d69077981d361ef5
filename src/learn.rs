//! Small learning helpers shared by the learned components (the learned
//! judge, the answer-sentence selector): the logistic function and a
//! deterministic logistic-regression fit, with balanced class weights (for
//! ranking) or without (for calibrated probabilities), and sample weights.
//!
//! invariant: every fit here is deterministic for the same input (full
//! batch, fixed step, no sampling).

/// The logistic function.
pub fn sigmoid(z: f32) -> f32 {
    1.0 / (1.0 + (-z).exp())
}

/// Dot product of a feature row and a weight vector.
pub fn dot(x: &[f32], w: &[f32]) -> f32 {
    x.iter().zip(w).map(|(a, b)| a * b).sum()
}

/// Fit logistic regression by full-batch gradient descent with L2
/// regularisation (not on the first weight, the bias: its feature must be
/// the constant 1) and class weights that balance the two labels.
pub fn fit_logistic<X: AsRef<[f32]>>(
    rows: &[(X, bool)],
    l2: f32,
    epochs: usize,
    lr: f32,
) -> Vec<f32> {
    fit(rows, None, l2, epochs, lr, true)
}

/// As [`fit_logistic`], each row counting `weights[i]` times (the weights
/// are scaled to average 1), classes still balanced.
pub fn fit_logistic_weighted<X: AsRef<[f32]>>(
    rows: &[(X, bool)],
    weights: &[f32],
    l2: f32,
    epochs: usize,
    lr: f32,
) -> Vec<f32> {
    fit(rows, Some(weights), l2, epochs, lr, true)
}

/// As [`fit_logistic_weighted`], without class weights: the fitted
/// probabilities then estimate the labels' real frequencies (calibration).
pub fn fit_calibrated<X: AsRef<[f32]>>(
    rows: &[(X, bool)],
    weights: &[f32],
    l2: f32,
    epochs: usize,
    lr: f32,
) -> Vec<f32> {
    fit(rows, Some(weights), l2, epochs, lr, false)
}

fn fit<X: AsRef<[f32]>>(
    rows: &[(X, bool)],
    weights: Option<&[f32]>,
    l2: f32,
    epochs: usize,
    lr: f32,
    balance: bool,
) -> Vec<f32> {
    let Some(first) = rows.first() else {
        return Vec::new();
    };
    let n = first.0.as_ref().len();
    let mut w = vec![0.0f32; n];
    let mean_weight = weights.map_or(1.0, |ws| ws.iter().sum::<f32>() / ws.len().max(1) as f32);
    let sample: Vec<f32> = (0..rows.len())
        .map(|i| weights.map_or(1.0, |ws| ws[i] / mean_weight))
        .collect();
    let pos: f32 = (0..rows.len())
        .filter(|i| rows[*i].1)
        .map(|i| sample[i])
        .sum::<f32>()
        .max(1e-6);
    let neg: f32 = (0..rows.len())
        .filter(|i| !rows[*i].1)
        .map(|i| sample[i])
        .sum::<f32>()
        .max(1e-6);
    let total = pos + neg;
    let (wp, wn) = if balance {
        (total / (2.0 * pos), total / (2.0 * neg))
    } else {
        (1.0, 1.0)
    };
    let mut grad = vec![0.0f32; n];
    for _ in 0..epochs {
        grad.iter_mut().for_each(|g| *g = 0.0);
        for (i, (x, y)) in rows.iter().enumerate() {
            let x = x.as_ref();
            let target = if *y { 1.0 } else { 0.0 };
            let cw = sample[i] * if *y { wp } else { wn };
            let d = cw * (sigmoid(dot(x, &w)) - target);
            for (g, xi) in grad.iter_mut().zip(x) {
                *g += d * xi;
            }
        }
        for (i, (wi, g)) in w.iter_mut().zip(&grad).enumerate() {
            let reg = if i == 0 { 0.0 } else { l2 * *wi };
            *wi -= lr * (g / total + reg);
        }
    }
    w
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Without class weights, logistic regression on data drawn from a
    /// known logistic curve, p = sigmoid(2x - 1), recovers the curve (a
    /// check against the generating model, not a stored answer).
    #[test]
    fn calibrated_fit_recovers_a_known_curve() {
        let mut rows = Vec::new();
        // Deterministic stratified draw: at each x, positives in the
        // proportion the curve gives.
        for i in 0..=40 {
            let x = -2.0 + i as f32 * 0.1;
            let p = sigmoid(2.0 * x - 1.0);
            let k = (p * 100.0).round() as usize;
            for j in 0..100 {
                rows.push((vec![1.0, x], j < k));
            }
        }
        let w = fit_calibrated(&rows, &vec![1.0; rows.len()], 0.0, 4000, 1.0);
        assert!(
            (w[1] - 2.0).abs() < 0.1 && (w[0] + 1.0).abs() < 0.1,
            "{w:?}"
        );
        // Balanced class weights shift the bias toward the rarer class.
        let b = fit_logistic(&rows, 0.0, 4000, 1.0);
        assert!(b[0] > w[0], "{b:?} vs {w:?}");
    }
}
