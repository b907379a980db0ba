//! Sampling designs on the unit hypercube: grids, Latin hypercube, Morris trajectories and
//! Saltelli's cross-sampled matrices. Each row is one run; each column one parameter, in [0, 1].
//!
//! Every random draw comes from `rng::stream(seed, Domain::Sweep, 0, SAMPLING)`: the same seed
//! gives the same design on any machine and thread count.

use interstice_sim::rng::{self, Domain, Stream};

/// The `step` argument of the sampling stream (run seeds use step 0, the bootstrap step 2).
pub const SAMPLING: u64 = 1;

/// The random stream of a sweep's sampling.
pub fn sampling_stream(seed: u64) -> Stream {
    rng::stream(seed, Domain::Sweep, 0, SAMPLING)
}

/// A uniform integer in `0..n` (multiply-shift: bias below n / 2^64).
pub fn below(s: &mut Stream, n: usize) -> usize {
    ((u128::from(s.next_u64()) * n as u128) >> 64) as usize
}

/// A uniformly random permutation of `0..n` (Fisher and Yates; Durstenfeld 1964).
pub fn permutation(s: &mut Stream, n: usize) -> Vec<usize> {
    let mut p: Vec<usize> = (0..n).collect();
    for i in (1..n).rev() {
        let j = below(s, i + 1);
        p.swap(i, j);
    }
    p
}

/// Latin hypercube sample of `n` points in `d` dimensions (McKay, Beckman and Conover 1979,
/// Technometrics 21:239): each dimension is cut into `n` equal strata and every stratum holds
/// exactly one point, placed uniformly inside it; strata are paired across dimensions by
/// independent random permutations.
pub fn latin_hypercube(n: usize, d: usize, s: &mut Stream) -> Vec<Vec<f64>> {
    let mut x = vec![vec![0.0; d]; n];
    for k in 0..d {
        let perm = permutation(s, n);
        for (i, row) in x.iter_mut().enumerate() {
            row[k] = (perm[i] as f64 + s.uniform()) / n as f64;
        }
    }
    x
}

/// The Morris step in unit coordinates on a grid of `levels` levels: `p / (2 (p - 1))`
/// (Morris 1991, Technometrics 33:161).
pub fn morris_delta(levels: usize) -> f64 {
    levels as f64 / (2.0 * (levels as f64 - 1.0))
}

/// `r` Morris trajectories of `d + 1` points each on the grid `{0, 1/(p-1), ..., 1}`
/// (Morris 1991, Technometrics 33:161, the randomised orientation matrix B*): a random base point
/// from the levels that leave room for one step, a random direction per factor, then one factor
/// at a time moves by the step `Delta = p / (2 (p - 1))`, in a random order. Consecutive points
/// differ in exactly one coordinate, by exactly `Delta`.
pub fn morris(r: usize, d: usize, levels: usize, s: &mut Stream) -> Vec<Vec<f64>> {
    let delta = morris_delta(levels);
    let step = 1.0 / (levels as f64 - 1.0);
    let starts = levels / 2; // levels k / (p - 1) with k + p/2 <= p - 1
    let mut out = Vec::with_capacity(r * (d + 1));
    for _ in 0..r {
        let mut x: Vec<f64> = Vec::with_capacity(d);
        let mut dir = Vec::with_capacity(d);
        for _ in 0..d {
            let base = below(s, starts) as f64 * step;
            let up = s.next_u64() & 1 == 0;
            x.push(if up { base } else { base + delta });
            dir.push(if up { 1.0 } else { -1.0 });
        }
        let order = permutation(s, d);
        out.push(x.clone());
        for &k in &order {
            // Land exactly on the grid level (no accumulated rounding).
            x[k] = ((x[k] + dir[k] * delta) / step).round() * step;
            out.push(x.clone());
        }
    }
    out
}

/// Saltelli's cross-sampled design (Saltelli 2002, Comput Phys Commun 145:280; Saltelli et al.
/// 2010, Comput Phys Commun 181:259): two independent matrices A and B of `n` rows (plain Monte
/// Carlo, uniform on the unit hypercube), then for each base row j the block
/// `A_j, A_B^(1)_j .. A_B^(d)_j, [B_A^(1)_j .. B_A^(d)_j,] B_j` of `d + 2` (or `2d + 2` with
/// second-order indices) rows, where `A_B^(i)` is A with its column i taken from B and `B_A^(i)`
/// is B with its column i taken from A. The row order is the one the estimators of
/// [`crate::sensitivity::sobol`] (and SALib's `sobol.analyze`) read.
pub fn saltelli(n: usize, d: usize, second_order: bool, s: &mut Stream) -> Vec<Vec<f64>> {
    let block = if second_order { 2 * d + 2 } else { d + 2 };
    let mut out = Vec::with_capacity(n * block);
    for _ in 0..n {
        let a: Vec<f64> = (0..d).map(|_| s.uniform()).collect();
        let b: Vec<f64> = (0..d).map(|_| s.uniform()).collect();
        out.push(a.clone());
        for i in 0..d {
            let mut ab = a.clone();
            ab[i] = b[i];
            out.push(ab);
        }
        if second_order {
            for i in 0..d {
                let mut ba = b.clone();
                ba[i] = a[i];
                out.push(ba);
            }
        }
        out.push(b);
    }
    out
}

/// Indices of a full grid: run i's value index for each factor (the first factor slowest).
pub fn grid_indices(i: usize, sizes: &[usize]) -> Vec<usize> {
    let mut rest = i;
    let mut idx = vec![0; sizes.len()];
    for k in (0..sizes.len()).rev() {
        idx[k] = rest % sizes[k];
        rest /= sizes[k];
    }
    idx
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn grid_indices_count_like_nested_loops() {
        let sizes = [2, 3];
        let all: Vec<Vec<usize>> = (0..6).map(|i| grid_indices(i, &sizes)).collect();
        assert_eq!(all, vec![vec![0, 0], vec![0, 1], vec![0, 2], vec![1, 0], vec![1, 1], vec![1, 2]]);
    }

    #[test]
    fn permutations_are_permutations() {
        let mut s = sampling_stream(3);
        for n in [1, 2, 7, 100] {
            let mut p = permutation(&mut s, n);
            p.sort_unstable();
            assert_eq!(p, (0..n).collect::<Vec<_>>());
        }
    }
}
