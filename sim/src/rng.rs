//! Random streams derived from (run seed, process, entity or packet id, step).
//!
//! Each random decision of the engine draws from a stream that depends only on those four
//! numbers, never on which thread runs it or in what order: results are bit-identical for any
//! thread count. Streams are xoshiro256++ generators (Blackman and Vigna 2021, ACM TOMS 47:36)
//! whose state is filled by SplitMix64 from a key that mixes the four numbers.

use rand_core::{Rng, SeedableRng};
use rand_xoshiro::Xoshiro256PlusPlus;

/// The process a stream belongs to, so that two processes never share a stream.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[repr(u64)]
pub enum Domain {
    Tissue = 1,
    Vessels = 2,
    Extravasation = 3,
    Transport = 4,
    Binding = 5,
    Uptake = 6,
    Plasma = 7,
    Growth = 8,
    Intervention = 9,
    Sweep = 10,
}

/// SplitMix64 finaliser (Steele, Lea and Flood 2014): a bijective 64-bit mix.
#[inline]
pub fn mix64(mut z: u64) -> u64 {
    z = z.wrapping_add(0x9e37_79b9_7f4a_7c15);
    z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
    z ^ (z >> 31)
}

/// The 64-bit key of stream (seed, domain, id, step).
#[inline]
pub fn stream_key(seed: u64, domain: Domain, id: u64, step: u64) -> u64 {
    mix64(mix64(mix64(mix64(seed) ^ domain as u64) ^ id) ^ step)
}

/// The generator of stream (seed, domain, id, step).
#[inline]
pub fn stream(seed: u64, domain: Domain, id: u64, step: u64) -> Stream {
    Stream(Xoshiro256PlusPlus::seed_from_u64(stream_key(seed, domain, id, step)))
}

/// A random stream with the draws the engine needs.
#[derive(Debug, Clone)]
pub struct Stream(pub Xoshiro256PlusPlus);

impl Stream {
    /// Next raw 64 bits.
    #[inline]
    pub fn next_u64(&mut self) -> u64 {
        self.0.next_u64()
    }

    /// Uniform in [0, 1), 53 random bits.
    #[inline]
    pub fn uniform(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 * (1.0 / (1u64 << 53) as f64)
    }

    /// Uniform in (0, 1]: safe under a logarithm.
    #[inline]
    pub fn uniform_open0(&mut self) -> f64 {
        ((self.next_u64() >> 11) + 1) as f64 * (1.0 / (1u64 << 53) as f64)
    }

    /// Bernoulli trial with probability `p`.
    #[inline]
    pub fn chance(&mut self, p: f64) -> bool {
        self.uniform() < p
    }

    /// A pair of independent standard normal deviates (Box and Muller 1958).
    #[inline]
    pub fn normal_pair(&mut self) -> (f64, f64) {
        let r = (-2.0 * self.uniform_open0().ln()).sqrt();
        let (s, c) = (std::f64::consts::TAU * self.uniform()).sin_cos();
        (r * c, r * s)
    }

    /// One standard normal deviate.
    #[inline]
    pub fn normal(&mut self) -> f64 {
        self.normal_pair().0
    }

    /// Three independent uniform deviates on [-sqrt 3, sqrt 3) (mean 0, variance 1) from one
    /// 64-bit draw (21 bits each): the increments of the simplified weak Euler scheme
    /// (Kloeden and Platen 1992, Numerical Solution of SDEs, section 14.1).
    #[inline]
    pub fn unit_variance_uniform3(&mut self) -> [f64; 3] {
        const S: f64 = 1.732_050_807_568_877_2; // sqrt(3)
        const SCALE: f64 = 2.0 * S / (1u64 << 21) as f64;
        let x = self.next_u64();
        let a = (x & 0x1f_ffff) as f64 + 0.5;
        let b = ((x >> 21) & 0x1f_ffff) as f64 + 0.5;
        let c = ((x >> 42) & 0x1f_ffff) as f64 + 0.5;
        [a * SCALE - S, b * SCALE - S, c * SCALE - S]
    }

    /// Poisson deviate with mean `lambda`: inversion for small means, a normal approximation
    /// with continuity correction above 1e3 (where its relative error is below 1e-3).
    pub fn poisson(&mut self, lambda: f64) -> u64 {
        if lambda <= 0.0 {
            return 0;
        }
        if lambda > 1e3 {
            let x = lambda + lambda.sqrt() * self.normal() + 0.5;
            return if x < 0.0 { 0 } else { x as u64 };
        }
        // Inversion by sequential search (Devroye 1986, section X.3.2).
        let mut k = 0u64;
        let mut p = (-lambda).exp();
        let mut cdf = p;
        let u = self.uniform();
        while u > cdf && p > 0.0 {
            k += 1;
            p *= lambda / k as f64;
            cdf += p;
        }
        k
    }

    /// Binomial deviate: number of successes in `n` trials of probability `p`.
    ///
    /// Small means (`n min(p, 1-p) < 30`) by inversion with the probability recurrence
    /// (the BINV algorithm of Kachitvichyanukul and Schmeiser 1988, Commun ACM 31:216): one
    /// uniform and a few multiplications per unit of the mean. Larger means by the normal
    /// approximation with continuity correction (standard deviation above 5, where its
    /// distribution error is a fraction of a percent of the spread).
    pub fn binomial(&mut self, n: u64, p: f64) -> u64 {
        if n == 0 || p <= 0.0 {
            return 0;
        }
        if p >= 1.0 {
            return n;
        }
        if n <= 16 {
            return (0..n).filter(|_| self.chance(p)).count() as u64;
        }
        let (q, flip) = if p > 0.5 { (1.0 - p, true) } else { (p, false) };
        let mean = n as f64 * q;
        let k = if mean < 30.0 {
            let r = q / (1.0 - q);
            let mut pk = (n as f64 * (-q).ln_1p()).exp();
            let mut u = self.uniform();
            let mut k = 0u64;
            while u > pk && k < n {
                u -= pk;
                pk *= r * (n - k) as f64 / (k + 1) as f64;
                k += 1;
                if pk <= 0.0 {
                    break;
                }
            }
            k
        } else {
            let sd = (mean * (1.0 - q)).sqrt();
            (mean + sd * self.normal() + 0.5).floor().clamp(0.0, n as f64) as u64
        };
        if flip { n - k } else { k }
    }
}

/// Stochastic rounding: `floor(x)` plus one with probability `frac(x)`; unbiased.
#[inline]
pub fn stochastic_round(x: f64, s: &mut Stream) -> u64 {
    let f = x.floor();
    f as u64 + u64::from(s.uniform() < x - f)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn streams_depend_on_every_part_of_the_key() {
        let base = stream(7, Domain::Transport, 3, 10).next_u64();
        assert_eq!(base, stream(7, Domain::Transport, 3, 10).next_u64());
        assert_ne!(base, stream(8, Domain::Transport, 3, 10).next_u64());
        assert_ne!(base, stream(7, Domain::Binding, 3, 10).next_u64());
        assert_ne!(base, stream(7, Domain::Transport, 4, 10).next_u64());
        assert_ne!(base, stream(7, Domain::Transport, 3, 11).next_u64());
    }

    #[test]
    fn uniform_and_normal_moments() {
        // Sample moments against their exact values; tolerances are 5 standard errors.
        let n = 200_000;
        let mut s = stream(1, Domain::Tissue, 0, 0);
        let (mut m, mut m2) = (0.0, 0.0);
        for _ in 0..n {
            let x = s.normal();
            m += x;
            m2 += x * x;
        }
        m /= n as f64;
        m2 /= n as f64;
        assert!(m.abs() < 5.0 / (n as f64).sqrt());
        assert!((m2 - 1.0).abs() < 5.0 * (2.0 / n as f64).sqrt());
        let mut v = 0.0;
        for _ in 0..n {
            let u = s.unit_variance_uniform3();
            v += u[0] * u[0] + u[1] * u[1] + u[2] * u[2];
        }
        v /= 3.0 * n as f64;
        // Var of U^2 for U uniform with unit variance is 0.8.
        assert!((v - 1.0).abs() < 5.0 * (0.8 / (3.0 * n as f64)).sqrt());
    }

    #[test]
    fn poisson_and_binomial_means() {
        let mut s = stream(2, Domain::Tissue, 0, 0);
        for &lam in &[0.3, 4.0, 50.0, 5000.0] {
            let n = 20_000;
            let mean: f64 = (0..n).map(|_| s.poisson(lam) as f64).sum::<f64>() / n as f64;
            assert!((mean - lam).abs() < 5.0 * (lam / n as f64).sqrt(), "poisson {lam}: {mean}");
        }
        for &(trials, p) in &[(10u64, 0.3), (1000, 0.01), (1000, 0.97), (100_000, 0.4), (200, 0.1), (1_000_000, 1e-5)] {
            let n = 20_000;
            let mean: f64 = (0..n).map(|_| s.binomial(trials, p) as f64).sum::<f64>() / n as f64;
            let sd = (trials as f64 * p * (1.0 - p) / n as f64).sqrt();
            assert!((mean - trials as f64 * p).abs() < 5.0 * sd, "binomial {trials} {p}: {mean}");
        }
    }
}

#[cfg(test)]
mod binomial_tests {
    use super::*;

    #[test]
    fn small_mean_binomial_matches_the_probability_mass_function() {
        // Chi-square goodness of fit of 50 000 draws of Binomial(200, 0.05) against the exact
        // mass function, pooled to cells of expected count >= 5; 0.1 % critical value.
        let (n, p, draws) = (200u64, 0.05, 50_000usize);
        let mut s = stream(4, Domain::Tissue, 1, 2);
        let mut counts = vec![0f64; n as usize + 1];
        for _ in 0..draws {
            counts[s.binomial(n, p) as usize] += 1.0;
        }
        let mut pmf = vec![0f64; n as usize + 1];
        pmf[0] = (1.0 - p).powi(n as i32);
        for k in 1..=n as usize {
            pmf[k] = pmf[k - 1] * (n as f64 - k as f64 + 1.0) / k as f64 * p / (1.0 - p);
        }
        let (mut chi, mut cells, mut eo, mut ee) = (0.0, 0, 0.0, 0.0);
        for k in 0..=n as usize {
            eo += counts[k];
            ee += pmf[k] * draws as f64;
            if ee >= 5.0 {
                chi += (eo - ee).powi(2) / ee;
                cells += 1;
                eo = 0.0;
                ee = 0.0;
            }
        }
        let dof = (cells - 1) as f64;
        // Wilson-Hilferty 0.999 quantile.
        let crit = dof * (1.0 - 2.0 / (9.0 * dof) + 3.090_232 * (2.0 / (9.0 * dof)).sqrt()).powi(3);
        assert!(chi < crit, "chi-square {chi} over {cells} cells, critical {crit}");
    }
}
