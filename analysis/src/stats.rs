//! Summary statistics used by the metrics.

/// Area under a sampled curve by the trapezoidal rule; `None` with fewer than one point or any
/// non-finite value. One point gives 0.
pub fn trapezoid(x: &[f64], y: &[f64]) -> Option<f64> {
    if x.is_empty() || x.len() != y.len() || x.iter().chain(y).any(|v| !v.is_finite()) {
        return None;
    }
    Some(x.windows(2).zip(y.windows(2)).map(|(x, y)| 0.5 * (x[1] - x[0]) * (y[0] + y[1])).sum())
}

/// True for a number greater than 0 (false for NaN).
pub fn positive(x: f64) -> bool {
    x > 0.0
}

/// Arithmetic mean; NaN for no values.
pub fn mean(v: &[f64]) -> f64 {
    if v.is_empty() { f64::NAN } else { v.iter().sum::<f64>() / v.len() as f64 }
}

/// Coefficient of variation: population standard deviation (divisor n) over the mean.
/// NaN for no values or a zero mean.
pub fn coefficient_of_variation(v: &[f64]) -> f64 {
    let m = mean(v);
    if !(m.is_finite() && m != 0.0) {
        return f64::NAN;
    }
    let var = v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / v.len() as f64;
    var.sqrt() / m
}

/// Gini coefficient of non-negative amounts: half the relative mean absolute difference,
/// `G = sum_i sum_j |x_i - x_j| / (2 n^2 mean)`, computed from the sorted values as
/// `G = sum_i (2 i - n - 1) x_(i) / (n sum x)` (i = 1..n ascending).
///
/// Gini, C. (1912), *Variabilità e mutabilità*, Bologna: Tipografia di Paolo Cuppini.
/// 0 when every cell holds the same amount; `(n - 1) / n` when one cell holds everything.
/// NaN for no values or a zero sum.
pub fn gini(v: &[f64]) -> f64 {
    let n = v.len();
    let total: f64 = v.iter().sum();
    if n == 0 || !positive(total) {
        return f64::NAN;
    }
    let mut s = v.to_vec();
    s.sort_by(f64::total_cmp);
    let acc: f64 = s.iter().enumerate().map(|(i, x)| (2.0 * (i as f64 + 1.0) - n as f64 - 1.0) * x).sum();
    acc / (n as f64 * total)
}

/// Smallest `d` such that the `w`-weighted amount with distance <= `d` reaches `q` of the total
/// (0 < q <= 1). Pairs with non-finite distance are ignored; NaN when the total weight is 0.
pub fn weighted_quantile(d: &[f64], w: &[f64], q: f64) -> f64 {
    let mut pairs: Vec<(f64, f64)> = d.iter().zip(w).filter(|(d, _)| d.is_finite()).map(|(&d, &w)| (d, w)).collect();
    let total: f64 = pairs.iter().map(|p| p.1).sum();
    if !positive(total) {
        return f64::NAN;
    }
    pairs.sort_by(|a, b| a.0.total_cmp(&b.0));
    let target = q * total;
    let mut acc = 0.0;
    for (d, w) in &pairs {
        acc += w;
        if acc >= target {
            return *d;
        }
    }
    pairs.last().map_or(f64::NAN, |p| p.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    // Outside reference: the double-sum definition of Gini (1912), evaluated by brute force.
    #[test]
    fn gini_matches_the_double_sum_definition() {
        let sets: [&[f64]; 5] =
            [&[1.0, 1.0, 1.0, 1.0], &[0.0, 0.0, 0.0, 8.0], &[1.0, 2.0, 3.0], &[5.0], &[0.3, 7.0, 2.2, 0.0, 9.1, 4.4]];
        for v in sets {
            let n = v.len() as f64;
            let m = v.iter().sum::<f64>() / n;
            let mut dsum = 0.0;
            for a in v {
                for b in v {
                    dsum += (a - b).abs();
                }
            }
            let want = dsum / (2.0 * n * n * m);
            assert!((gini(v) - want).abs() < 1e-14, "{v:?}: {} vs {want}", gini(v));
        }
        // Known answers by hand: equal shares 0; one holder of four (n - 1) / n = 0.75.
        assert_eq!(gini(&[2.0; 4]), 0.0);
        assert_eq!(gini(&[0.0, 0.0, 0.0, 8.0]), 0.75);
        assert!(gini(&[0.0, 0.0]).is_nan());
    }

    // Known answers by hand.
    #[test]
    fn cv_trapezoid_and_quantile_by_hand() {
        assert_eq!(coefficient_of_variation(&[1.0, 3.0]), 0.5); // sd 1 (divisor n), mean 2
        assert_eq!(trapezoid(&[0.0, 1.0, 3.0], &[0.0, 2.0, 2.0]), Some(5.0));
        assert_eq!(trapezoid(&[0.0], &[4.0]), Some(0.0));
        assert_eq!(trapezoid(&[0.0, 1.0], &[f64::NAN, 1.0]), None);
        let d = [3.0, 1.0, 2.0, 4.0];
        let w = [1.0, 1.0, 1.0, 1.0];
        assert_eq!(weighted_quantile(&d, &w, 0.5), 2.0);
        assert_eq!(weighted_quantile(&d, &w, 0.9), 4.0);
        assert_eq!(weighted_quantile(&d, &w, 0.25), 1.0);
    }
}
