//! Sensitivity indices: Morris elementary effects (mu, mu*, sigma) and Sobol first-order, total
//! and second-order indices, with bootstrap confidence intervals.
//!
//! Both read the unit-hypercube design of [`crate::design`] in its row order. The estimators
//! follow the published formulas; SALib's `morris.analyze` and `sobol.analyze` implement the
//! same ones and `tests/sensitivity.rs` checks the two against each other on the same samples.

use interstice_sim::rng::{self, Domain, Stream};

use crate::design::{below, morris_delta};

/// The `step` of the bootstrap streams (sampling uses 1, run seeds 0).
pub const BOOTSTRAP: u64 = 2;

/// The bootstrap stream of output `id` of a sweep with seed `seed`.
pub fn bootstrap_stream(seed: u64, id: u64) -> Stream {
    rng::stream(seed, Domain::Sweep, id, BOOTSTRAP)
}

/// Standard normal cumulative distribution by its Taylor series
/// `Phi(x) = 1/2 + phi(x) (x + x^3/3 + x^5/(3 5) + ...)` (Marsaglia 2004, J Stat Softw 11(4)),
/// accurate to about 1e-15 for |x| < 8 (beyond, 0 or 1 to double precision).
pub fn normal_cdf(x: f64) -> f64 {
    if x < -8.0 {
        return 0.0;
    }
    if x > 8.0 {
        return 1.0;
    }
    let mut sum = x;
    let mut term = x;
    let mut k = 1.0;
    while term.abs() > 1e-17 * sum.abs().max(1e-300) {
        k += 2.0;
        term *= x * x / k;
        sum += term;
    }
    0.5 + sum * (-0.5 * x * x).exp() / (2.0 * std::f64::consts::PI).sqrt()
}

/// Standard normal quantile: `normal_cdf` inverted by bisection to double precision.
pub fn normal_quantile(p: f64) -> f64 {
    if !(p > 0.0 && p < 1.0) {
        return f64::NAN;
    }
    let (mut lo, mut hi) = (-8.0f64, 8.0f64);
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if normal_cdf(mid) < p {
            lo = mid;
        } else {
            hi = mid;
        }
        if hi - lo < 1e-15 {
            break;
        }
    }
    0.5 * (lo + hi)
}

fn mean(x: &[f64]) -> f64 {
    x.iter().sum::<f64>() / x.len() as f64
}

/// Standard deviation with `ddof` degrees of freedom removed (NaN when too few values).
fn std_dev(x: &[f64], ddof: usize) -> f64 {
    if x.len() <= ddof {
        return f64::NAN;
    }
    let m = mean(x);
    (x.iter().map(|v| (v - m) * (v - m)).sum::<f64>() / (x.len() - ddof) as f64).sqrt()
}

/// Morris screening measures of each factor.
#[derive(Debug, Clone, PartialEq)]
pub struct MorrisIndices {
    /// Mean elementary effect.
    pub mu: Vec<f64>,
    /// Mean absolute elementary effect (Campolongo, Cariboni and Saltelli 2007).
    pub mu_star: Vec<f64>,
    /// Standard deviation of the elementary effects (n - 1 in the denominator).
    pub sigma: Vec<f64>,
    /// Half-width of the bootstrap confidence interval of mu*.
    pub mu_star_conf: Vec<f64>,
    /// Trajectories used (those whose every output is a number).
    pub trajectories: usize,
}

/// Morris's elementary effects (Morris 1991, Technometrics 33:161) from trajectories of
/// `d + 1` rows of `unit` with outputs `y`: for the factor that moves between two consecutive
/// points, `EE = (y(upper) - y(lower)) / Delta`, `Delta = p / (2 (p - 1))` on the unit
/// hypercube; then mu, sigma (Morris 1991) and mu* = mean |EE| (Campolongo, Cariboni and
/// Saltelli 2007, Environ Model Softw 22:1509). Trajectories with a missing output are left
/// out. The confidence interval of mu* is `z * sd` of mu* over `resamples` bootstrap resamples
/// of the trajectories.
pub fn morris(
    unit: &[Vec<f64>],
    y: &[f64],
    d: usize,
    levels: usize,
    resamples: usize,
    confidence: f64,
    stream: &mut Stream,
) -> MorrisIndices {
    let delta = morris_delta(levels);
    let mut ee: Vec<Vec<f64>> = vec![Vec::new(); d];
    let r = unit.len() / (d + 1);
    let mut used = 0;
    for t in 0..r {
        let rows = t * (d + 1)..(t + 1) * (d + 1);
        if y[rows.clone()].iter().any(|v| !v.is_finite()) {
            continue;
        }
        used += 1;
        for m in rows.start + 1..rows.end {
            let (a, b) = (&unit[m - 1], &unit[m]);
            let Some(k) = (0..d).find(|&k| a[k] != b[k]) else { continue };
            let sign = if b[k] > a[k] { 1.0 } else { -1.0 };
            ee[k].push(sign * (y[m] - y[m - 1]) / delta);
        }
    }
    let z = normal_quantile(0.5 + confidence / 2.0);
    let mut out = MorrisIndices {
        mu: Vec::new(),
        mu_star: Vec::new(),
        sigma: Vec::new(),
        mu_star_conf: Vec::new(),
        trajectories: used,
    };
    for e in &ee {
        if e.is_empty() {
            out.mu.push(f64::NAN);
            out.mu_star.push(f64::NAN);
            out.sigma.push(f64::NAN);
            out.mu_star_conf.push(f64::NAN);
            continue;
        }
        let abs: Vec<f64> = e.iter().map(|v| v.abs()).collect();
        out.mu.push(mean(e));
        out.mu_star.push(mean(&abs));
        out.sigma.push(std_dev(e, 1));
        let boot: Vec<f64> = (0..resamples)
            .map(|_| (0..abs.len()).map(|_| abs[below(stream, abs.len())]).sum::<f64>() / abs.len() as f64)
            .collect();
        out.mu_star_conf.push(z * std_dev(&boot, 1));
    }
    out
}

/// Sobol indices of each factor.
#[derive(Debug, Clone, PartialEq)]
pub struct SobolIndices {
    pub s1: Vec<f64>,
    pub s1_conf: Vec<f64>,
    pub st: Vec<f64>,
    pub st_conf: Vec<f64>,
    /// Second-order indices `s2[j][k]` for j < k (NaN elsewhere), when the design has them.
    pub s2: Option<Vec<Vec<f64>>>,
    pub s2_conf: Option<Vec<Vec<f64>>>,
    /// Base rows used (those whose whole block has numbers).
    pub base_rows: usize,
    /// Whether the output was constant (every index 0 then, as in SALib).
    pub constant: bool,
}

/// The blocks of a Saltelli design: A, A_B^(i), [B_A^(i),] B of each kept base row.
struct Blocks {
    a: Vec<f64>,
    b: Vec<f64>,
    ab: Vec<Vec<f64>>,
    ba: Vec<Vec<f64>>,
}

impl Blocks {
    fn take(&self, idx: &[usize]) -> Blocks {
        let pick = |v: &Vec<f64>| idx.iter().map(|&i| v[i]).collect::<Vec<f64>>();
        Blocks {
            a: pick(&self.a),
            b: pick(&self.b),
            ab: self.ab.iter().map(pick).collect(),
            ba: self.ba.iter().map(pick).collect(),
        }
    }

    /// Population variance of A and B together.
    fn variance(&self) -> f64 {
        let n = (self.a.len() + self.b.len()) as f64;
        let m = (self.a.iter().sum::<f64>() + self.b.iter().sum::<f64>()) / n;
        (self.a.iter().chain(&self.b).map(|v| (v - m) * (v - m)).sum::<f64>()) / n
    }

    /// First-order index of factor i (Saltelli et al. 2010, table 2 (b)): `mean(B (A_B^i - A)) / V`.
    fn first(&self, i: usize, v: f64) -> f64 {
        let n = self.a.len() as f64;
        self.b.iter().zip(&self.ab[i]).zip(&self.a).map(|((b, ab), a)| b * (ab - a)).sum::<f64>() / n / v
    }

    /// Total index of factor i (Jansen 1999, Saltelli et al. 2010 table 2 (f)): `mean((A - A_B^i)^2) / (2 V)`.
    fn total(&self, i: usize, v: f64) -> f64 {
        let n = self.a.len() as f64;
        0.5 * self.a.iter().zip(&self.ab[i]).map(|(a, ab)| (a - ab) * (a - ab)).sum::<f64>() / n / v
    }

    /// Second-order index of factors j, k (Saltelli 2002, eq. 12 with the first-order terms
    /// removed): `mean(B_A^j A_B^k - A B) / V - S_j - S_k`.
    fn second(&self, j: usize, k: usize, v: f64) -> f64 {
        let n = self.a.len() as f64;
        let vjk = self.ba[j]
            .iter()
            .zip(&self.ab[k])
            .zip(self.a.iter().zip(&self.b))
            .map(|((ba, ab), (a, b))| ba * ab - a * b)
            .sum::<f64>()
            / n
            / v;
        vjk - self.first(j, v) - self.first(k, v)
    }
}

/// Sobol indices from the outputs `y` of a Saltelli design of `d` factors (row order of
/// [`crate::design::saltelli`]): first-order by the estimator of Saltelli et al. 2010 (Comput
/// Phys Commun 181:259, table 2 (b)), total by Jansen's (ibid., table 2 (f)), second-order by
/// Saltelli 2002 (Comput Phys Commun 145:280). The outputs are first centred and scaled by
/// their mean and standard deviation (as SALib does: the estimators are biased for uncentred
/// outputs). Blocks with a missing output are left out. Confidence intervals: `z * sd` of each
/// index over `resamples` bootstrap resamples of the base rows.
pub fn sobol(
    y: &[f64],
    d: usize,
    second_order: bool,
    resamples: usize,
    confidence: f64,
    stream: &mut Stream,
) -> SobolIndices {
    let step = if second_order { 2 * d + 2 } else { d + 2 };
    let n_all = y.len() / step;
    let kept: Vec<usize> = (0..n_all).filter(|&j| y[j * step..(j + 1) * step].iter().all(|v| v.is_finite())).collect();
    let nan = vec![f64::NAN; d];
    let nan2 = || Some(vec![vec![f64::NAN; d]; d]);
    let mut out = SobolIndices {
        s1: nan.clone(),
        s1_conf: nan.clone(),
        st: nan.clone(),
        st_conf: nan,
        s2: if second_order { nan2() } else { None },
        s2_conf: if second_order { nan2() } else { None },
        base_rows: kept.len(),
        constant: false,
    };
    if kept.len() < 2 {
        return out;
    }
    let vals: Vec<f64> = kept.iter().flat_map(|&j| y[j * step..(j + 1) * step].iter().copied()).collect();
    let m = mean(&vals);
    let sd = std_dev(&vals, 0);
    if sd.partial_cmp(&(f64::EPSILON * m.abs().max(1.0))) != Some(std::cmp::Ordering::Greater) {
        out.constant = true;
        out.s1 = vec![0.0; d];
        out.st = vec![0.0; d];
        out.s1_conf = vec![0.0; d];
        out.st_conf = vec![0.0; d];
        return out;
    }
    let yn: Vec<f64> = vals.iter().map(|v| (v - m) / sd).collect();
    let n = kept.len();
    let col = |off: usize| (0..n).map(|j| yn[j * step + off]).collect::<Vec<f64>>();
    let blocks = Blocks {
        a: col(0),
        b: col(step - 1),
        ab: (0..d).map(|i| col(1 + i)).collect(),
        ba: if second_order { (0..d).map(|i| col(1 + d + i)).collect() } else { Vec::new() },
    };
    let v = blocks.variance();
    let z = normal_quantile(0.5 + confidence / 2.0);
    let resampled: Vec<Blocks> = (0..resamples)
        .map(|_| {
            let idx: Vec<usize> = (0..n).map(|_| below(stream, n)).collect();
            blocks.take(&idx)
        })
        .collect();
    let conf = |f: &dyn Fn(&Blocks, f64) -> f64| {
        let est: Vec<f64> = resampled.iter().map(|b| f(b, b.variance())).collect();
        z * std_dev(&est, 1)
    };
    for i in 0..d {
        out.s1[i] = blocks.first(i, v);
        out.st[i] = blocks.total(i, v);
        out.s1_conf[i] = conf(&|b, v| b.first(i, v));
        out.st_conf[i] = conf(&|b, v| b.total(i, v));
    }
    if second_order {
        let (s2, s2c) = (out.s2.as_mut().expect("second order"), out.s2_conf.as_mut().expect("second order"));
        for j in 0..d {
            for k in j + 1..d {
                s2[j][k] = blocks.second(j, k, v);
                s2c[j][k] = conf(&|b, v| b.second(j, k, v));
            }
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Values of Phi and its quantiles from the standard normal table (Abramowitz and Stegun
    /// 1964, table 26.1 and 26.5): Phi(1) = 0.841344746, Phi(1.96) = 0.975002105,
    /// z(0.975) = 1.959963985.
    #[test]
    fn normal_cdf_and_quantile_match_tables() {
        assert!((normal_cdf(0.0) - 0.5).abs() < 1e-15);
        assert!((normal_cdf(1.0) - 0.841_344_746).abs() < 1e-9);
        assert!((normal_cdf(1.96) - 0.975_002_105).abs() < 1e-9);
        assert!((normal_quantile(0.975) - 1.959_963_985).abs() < 1e-9);
        assert!((normal_quantile(0.5)).abs() < 1e-12);
    }
}
