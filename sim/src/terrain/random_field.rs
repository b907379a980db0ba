//! Gaussian random fields with a squared-exponential covariance, by spectral synthesis.
//!
//! A stationary Gaussian field with covariance `C(r) = sigma^2 exp(-r^2 / (2 l^2))` has the
//! spectral density `S(k) = sigma^2 (2 pi l^2)^(3/2) exp(-k^2 l^2 / 2)`. Filtering white noise by
//! `sqrt(S)` in Fourier space and transforming back gives a sample of the field (the spectral
//! method of Shinozuka and Deodatis 1996, Appl Mech Rev 49:29, in its discrete FFT form). The
//! transform runs on a box padded by two correlation lengths on each side (rounded up to a length
//! whose prime factors are 2, 3 and 5): across the periodic wrap of the discrete transform,
//! opposite faces of the lattice are at least `4 l` apart, where the correlation is
//! `exp(-8) = 3e-4`. White noise is drawn per voxel of the padded box from
//! its own stream: the field depends only on the seed.
//!
//! A log-normal field with mean `m` and coefficient of variation `cv` is `exp(mu + s G)` of the
//! standard field `G`, with `s^2 = ln(1 + cv^2)` and `mu = ln m - s^2 / 2` (moments of the
//! log-normal distribution); its correlation is a monotone transform of that of `G`.

use rayon::prelude::*;
use rustfft::FftPlanner;
use rustfft::num_complex::Complex;

use crate::lattice::Lattice;
use crate::rng::{Domain, stream};

/// A standard (zero mean, unit variance) Gaussian random field on the lattice with correlation
/// length `l` (m): correlation `exp(-r^2 / (2 l^2))` at distance `r`. `stream_id` selects an
/// independent field for the same seed.
pub fn gaussian_field(lattice: &Lattice, l: f64, seed: u64, stream_id: u64) -> Vec<f64> {
    let n = lattice.len();
    let lv = l / lattice.h; // correlation length in voxels
    if lv < 1e-3 {
        // Shorter than a voxel: independent values.
        return (0..n).map(|v| stream(seed, Domain::Tissue, stream_id << 40 | v as u64, 7).normal()).collect();
    }
    let pad = (2.0 * lv).ceil() as usize;
    let dims: [usize; 3] = std::array::from_fn(|a| fft_size(lattice.n[a] + 2 * pad));
    let [px, py, pz] = dims;
    let total = px * py * pz;
    let mut data: Vec<Complex<f64>> = (0..total)
        .into_par_iter()
        .map(|i| Complex::new(stream(seed, Domain::Tissue, stream_id << 40 | i as u64, 7).normal(), 0.0))
        .collect();
    fft3(&mut data, dims, false);
    // Filter: sqrt of the spectral density on the discrete wavenumbers, normalised below. The
    // Gaussian filter is separable, H = hx(i) hy(j) hz(k).
    let two_pi = std::f64::consts::TAU;
    let h1 = |m: usize| -> Vec<f64> {
        (0..m)
            .map(|i| {
                let f = freq(i, m);
                (-0.25 * two_pi * two_pi * f * f * lv * lv).exp()
            })
            .collect()
    };
    let (hx, hy, hz) = (h1(px), h1(py), h1(pz));
    data.par_chunks_mut(px).enumerate().for_each(|(row, line)| {
        let hyz = hy[row % py] * hz[row / py];
        for (c, &h) in line.iter_mut().zip(&hx) {
            *c *= h * hyz;
        }
    });
    fft3(&mut data, dims, true);
    // The filter's squared sum sets the variance of the result; divide it out exactly.
    let sq = |h: &[f64]| h.iter().map(|x| x * x).sum::<f64>();
    let norm = sq(&hx) * sq(&hy) * sq(&hz);
    // Forward and inverse unnormalised transforms scale by `total`; white noise of unit variance
    // filtered by H has variance sum|H|^2 / total per sample after the 1/total of the inverse.
    let scale = 1.0 / (norm * total as f64).sqrt();
    let mut out = vec![0.0; n];
    out.par_iter_mut().enumerate().for_each(|(v, o)| {
        let [i, j, k] = lattice.ijk(v);
        let idx = (i + pad) + px * ((j + pad) + py * (k + pad));
        *o = data[idx].re * scale;
    });
    out
}

/// The smallest length of at least `n` (and 2) whose prime factors are 2, 3 and 5: the mixed-radix
/// transforms of these lengths are about as fast as powers of two, and the padded box stays
/// close to the size it needs.
fn fft_size(n: usize) -> usize {
    let mut m = n.max(2);
    loop {
        let mut r = m;
        for p in [2, 3, 5] {
            while r.is_multiple_of(p) {
                r /= p;
            }
        }
        if r == 1 {
            return m;
        }
        m += 1;
    }
}

fn freq(i: usize, n: usize) -> f64 {
    let i = i as f64;
    let n = n as f64;
    if i <= n / 2.0 { i / n } else { (i - n) / n }
}

/// In-place 3D FFT (x fastest), unnormalised. Lines along y and z are gathered into contiguous
/// blocks (one per plane, or per row of planes) and transformed in one call per block, with the
/// scratch allocated once per block.
fn fft3(data: &mut [Complex<f64>], dims: [usize; 3], inverse: bool) {
    let [px, py, pz] = dims;
    let zero = Complex::new(0.0, 0.0);
    let mut planner = FftPlanner::<f64>::new();
    let mut plan = |n: usize| if inverse { planner.plan_fft_inverse(n) } else { planner.plan_fft_forward(n) };
    let (fx, fy, fz) = (plan(px), plan(py), plan(pz));
    let plane_len = px * py;
    data.par_chunks_mut(plane_len).for_each(|plane| {
        // x lines are contiguous: the plane is py of them.
        let mut scratch = vec![zero; fx.get_inplace_scratch_len().max(fy.get_inplace_scratch_len())];
        fx.process_with_scratch(plane, &mut scratch[..fx.get_inplace_scratch_len()]);
        // y lines: transpose the plane to [i][j], transform, transpose back.
        let mut t = vec![zero; plane_len];
        for j in 0..py {
            for i in 0..px {
                t[i * py + j] = plane[i + px * j];
            }
        }
        fy.process_with_scratch(&mut t, &mut scratch[..fy.get_inplace_scratch_len()]);
        for j in 0..py {
            for i in 0..px {
                plane[i + px * j] = t[i * py + j];
            }
        }
    });
    // z lines: for each row j, gather [i][k] across the planes, transform, scatter plane by plane.
    let data_ro: &[Complex<f64>] = data;
    let blocks: Vec<Vec<Complex<f64>>> = (0..py)
        .into_par_iter()
        .map(|j| {
            let mut t = vec![zero; px * pz];
            for k in 0..pz {
                let row = &data_ro[px * (j + py * k)..px * (j + py * k) + px];
                for (i, &v) in row.iter().enumerate() {
                    t[i * pz + k] = v;
                }
            }
            let mut scratch = vec![zero; fz.get_inplace_scratch_len()];
            fz.process_with_scratch(&mut t, &mut scratch);
            t
        })
        .collect();
    data.par_chunks_mut(plane_len).enumerate().for_each(|(k, plane)| {
        for (j, t) in blocks.iter().enumerate() {
            for i in 0..px {
                plane[i + px * j] = t[i * pz + k];
            }
        }
    });
}

/// Maps a standard Gaussian field to a log-normal field of mean `mean` and coefficient of
/// variation `cv` (0 gives the constant `mean`).
pub fn lognormal(g: &[f64], mean: f64, cv: f64) -> Vec<f64> {
    let s2 = (1.0 + cv * cv).ln();
    let s = s2.sqrt();
    let mu = mean.ln() - 0.5 * s2;
    g.iter().map(|x| (mu + s * x).exp()).collect()
}

/// Maps a standard Gaussian field to a normal field of mean `mean` and standard deviation `sd`,
/// clamped to `[lo, hi]`.
pub fn normal(g: &[f64], mean: f64, sd: f64, lo: f64, hi: f64) -> Vec<f64> {
    g.iter().map(|x| (mean + sd * x).clamp(lo, hi)).collect()
}

/// Empirical semivariogram at lag `lag` voxels along every axis (for the statistical tests).
#[cfg(test)]
pub(crate) fn semivariogram(l: &Lattice, f: &[f64], lag: usize) -> f64 {
    let (mut s, mut n) = (0.0, 0.0);
    for v in 0..l.len() {
        let ijk = l.ijk(v);
        for (a, &c) in ijk.iter().enumerate() {
            if c + lag < l.n[a] {
                let w = v + lag * l.stride(a);
                s += 0.5 * (f[v] - f[w]).powi(2);
                n += 1.0;
            }
        }
    }
    s / n
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn field_has_the_requested_moments_and_correlation() {
        // Against the model: mean 0, variance 1, correlation exp(-r^2/(2 l^2)) at r = l, 2l.
        // Tolerances are 4 standard errors for the effective number of independent samples
        // N_eff = V / ((2 pi)^(3/2) l^3) of all fields together (the integral scale of the
        // covariance), SE(mean) = 1/sqrt(N_eff), SE(variance) = sqrt(2/N_eff).
        let l = Lattice::new([48, 48, 48], 1.0, [0.0; 3]);
        let lc = 3.0;
        let fields = 6;
        let (mut m, mut m2, mut g1, mut g2) = (0.0, 0.0, 0.0, 0.0);
        for k in 0..fields {
            let f = gaussian_field(&l, lc, 42, k);
            let mean = f.iter().sum::<f64>() / f.len() as f64;
            m += mean / fields as f64;
            m2 += f.iter().map(|x| x * x).sum::<f64>() / f.len() as f64 / fields as f64;
            g1 += semivariogram(&l, &f, 3) / fields as f64;
            g2 += semivariogram(&l, &f, 6) / fields as f64;
        }
        let neff = fields as f64 * l.len() as f64 / ((std::f64::consts::TAU).powf(1.5) * lc.powi(3));
        assert!(m.abs() < 4.0 / neff.sqrt(), "mean {m}");
        let var = m2 - m * m;
        assert!((var - 1.0).abs() < 4.0 * (2.0 / neff).sqrt(), "variance {var}");
        // Semivariogram gamma(r) = 1 - exp(-r^2/(2 l^2)) for unit variance.
        let e1 = 1.0 - (-0.5f64).exp();
        let e2 = 1.0 - (-2.0f64).exp();
        assert!((g1 - e1).abs() < 4.0 * (2.0 / neff).sqrt(), "gamma(l) {g1} vs {e1}");
        assert!((g2 - e2).abs() < 4.0 * (2.0 / neff).sqrt(), "gamma(2l) {g2} vs {e2}");
    }

    #[test]
    fn fields_are_reproducible_and_independent_between_streams() {
        let l = Lattice::new([40, 40, 40], 1e-5, [0.0; 3]);
        let a = gaussian_field(&l, 2e-5, 1, 0);
        assert_eq!(a, gaussian_field(&l, 2e-5, 1, 0));
        let b = gaussian_field(&l, 2e-5, 1, 1);
        let c: f64 = a.iter().zip(&b).map(|(x, y)| x * y).sum::<f64>() / a.len() as f64;
        // Sample correlation of independent fields: SE 1/sqrt(N_eff), N_eff as above.
        let neff = l.len() as f64 / ((std::f64::consts::TAU).powf(1.5) * 8.0);
        assert!(c.abs() < 4.0 / neff.sqrt(), "streams correlate: {c}");
    }

    #[test]
    fn lognormal_transform_has_the_requested_mean_and_cv() {
        // Moments of exp(mu + s G): mean exp(mu + s^2/2), CV sqrt(exp(s^2) - 1).
        let g: Vec<f64> = (0..200_000).map(|i| stream(5, Domain::Tissue, i, 0).normal()).collect();
        let f = lognormal(&g, 0.04, 0.5);
        let n = f.len() as f64;
        let mean = f.iter().sum::<f64>() / n;
        let sd = (f.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / n).sqrt();
        assert!((mean / 0.04 - 1.0).abs() < 0.01, "{mean}");
        assert!((sd / mean - 0.5).abs() < 0.01, "{}", sd / mean);
    }
}
