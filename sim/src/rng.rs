//! Random streams derived from (run seed, process, entity or packet id, step).
//!
//! Each random decision of the engine draws from a stream that depends only on those four
//! numbers, never on which thread runs it or in what order: results are bit-identical for any
//! thread count. A stream is the SplitMix64 sequence (Steele, Lea and Flood 2014, "Fast
//! splittable pseudorandom number generators", OOPSLA 2014: 453) that starts from a 64-bit key
//! mixing the four numbers: one addition and one 64-bit mix per draw and nothing to set up, so
//! the millions of short streams a step opens (one per packet and process) cost a few
//! nanoseconds each. SplitMix64 passes the BigCrush battery (same paper); streams are a few
//! to a few thousand draws long against a period of 2^64.

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
    Streams::new(seed, domain).key(id, step)
}

/// The generator of stream (seed, domain, id, step).
#[inline]
pub fn stream(seed: u64, domain: Domain, id: u64, step: u64) -> Stream {
    Stream(stream_key(seed, domain, id, step))
}

/// The streams of one (seed, domain), with the part of the key they share mixed once: a loop
/// opening a stream per packet pays two mixes per stream instead of four. Gives the same
/// streams as [`stream`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Streams(u64);

impl Streams {
    /// The streams of `seed` and `domain`.
    #[inline]
    pub fn new(seed: u64, domain: Domain) -> Self {
        Streams(mix64(mix64(seed) ^ domain as u64))
    }

    /// Key of the stream of `id` at `step`.
    #[inline]
    pub fn key(self, id: u64, step: u64) -> u64 {
        mix64(mix64(self.0 ^ id) ^ step)
    }

    /// The stream of `id` at `step`.
    #[inline]
    pub fn at(self, id: u64, step: u64) -> Stream {
        Stream(self.key(id, step))
    }
}

/// A random stream with the draws the engine needs: SplitMix64 state.
#[derive(Debug, Clone)]
pub struct Stream(pub u64);

impl Stream {
    /// Next raw 64 bits (SplitMix64: the state advances by the golden-ratio increment and is
    /// mixed by [`mix64`], which adds that increment before mixing).
    #[inline]
    pub fn next_u64(&mut self) -> u64 {
        let z = mix64(self.0);
        self.0 = self.0.wrapping_add(0x9e37_79b9_7f4a_7c15);
        z
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
            let u = self.uniform();
            binomial_inversion(u, n, (n as f64 * (-q).ln_1p()).exp(), q / (1.0 - q))
        } else {
            let sd = (mean * (1.0 - q)).sqrt();
            (mean + sd * self.normal() + 0.5).floor().clamp(0.0, n as f64) as u64
        };
        if flip { n - k } else { k }
    }
}

impl Stream {
    /// Binomial deviate of `n` trials whose success probability is `1 - exp(-x)` (a first-order
    /// rate times a time step, `x >= 0`): the probability mass at zero is then exactly
    /// `exp(-n x)`, so the common draw of no success costs one exponential and one uniform.
    /// Small means by inversion (BINV, Kachitvichyanukul and Schmeiser 1988) started from that
    /// mass, with ratio `p / (1 - p) = exp(x) - 1`; otherwise as [`Stream::binomial`].
    pub fn binomial_of_rate(&mut self, n: u64, x: f64) -> u64 {
        if n == 0 || x <= 0.0 {
            return 0;
        }
        // p > 1/2 exactly when x > ln 2, and n p <= n x: the test needs no p.
        if x > std::f64::consts::LN_2 || n as f64 * x >= 30.0 {
            return self.binomial(n, -(-x).exp_m1());
        }
        let p0 = (-(n as f64) * x).exp();
        let u = self.uniform();
        if u <= p0 {
            return 0;
        }
        binomial_inversion(u, n, p0, x.exp_m1())
    }
}

/// Inversion of the binomial distribution function by sequential search from `k = 0` (BINV):
/// uniform `u`, `n` trials, mass at zero `p0`, odds `r = p / (1 - p)`.
#[inline]
fn binomial_inversion(mut u: f64, n: u64, p0: f64, r: f64) -> u64 {
    let mut pk = p0;
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
    fn streams_are_the_reference_splitmix64_sequence() {
        // Against the SplitMix64 of the `rand_xoshiro` crate (an outside implementation of
        // Steele, Lea and Flood 2014) and two values of the reference C code (splitmix64.c of
        // Blackman and Vigna, as quoted in that crate's tests).
        use rand_core::{Rng, SeedableRng};
        let key = 1_477_776_061_723_855_037u64;
        let mut ours = Stream(key);
        assert_eq!(ours.next_u64(), 1_985_237_415_132_408_290);
        assert_eq!(ours.next_u64(), 2_979_275_885_539_914_483);
        for k in [0u64, 1, key, u64::MAX, stream_key(3, Domain::Transport, 9, 4)] {
            let mut a = Stream(k);
            let mut b = rand_xoshiro::SplitMix64::seed_from_u64(k);
            for _ in 0..1000 {
                assert_eq!(a.next_u64(), b.next_u64());
            }
        }
        // The shared-prefix form gives the same streams.
        let s = Streams::new(11, Domain::Binding);
        assert_eq!(s.key(5, 6), stream_key(11, Domain::Binding, 5, 6));
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

    /// Chi-square statistic and degrees of freedom of draw counts `counts[k]` against the
    /// Binomial(n, p) mass function, pooled into cells of expected count >= 5 (a short tail
    /// joins the last cell).
    fn binomial_chi_square(n: u64, p: f64, counts: &[f64]) -> (f64, usize) {
        let draws: f64 = counts.iter().sum();
        let mut pmf = vec![0f64; n as usize + 1];
        pmf[0] = (1.0 - p).powi(n as i32);
        for k in 1..=n as usize {
            pmf[k] = pmf[k - 1] * (n as f64 - k as f64 + 1.0) / k as f64 * p / (1.0 - p);
        }
        let mut pooled: Vec<(f64, f64)> = Vec::new();
        let (mut eo, mut ee) = (0.0, 0.0);
        for k in 0..=n as usize {
            eo += counts[k];
            ee += pmf[k] * draws;
            if ee >= 5.0 {
                pooled.push((eo, ee));
                eo = 0.0;
                ee = 0.0;
            }
        }
        if let Some(last) = pooled.last_mut() {
            last.0 += eo;
            last.1 += ee;
        }
        let chi = pooled.iter().map(|(o, e)| (o - e).powi(2) / e).sum();
        (chi, pooled.len().saturating_sub(1).max(1))
    }

    /// Counts of `draws` draws of `draw`, indexed by value (0..=n).
    fn counts(n: u64, draws: usize, mut draw: impl FnMut() -> u64) -> Vec<f64> {
        let mut c = vec![0f64; n as usize + 1];
        for _ in 0..draws {
            c[draw() as usize] += 1.0;
        }
        c
    }

    #[test]
    fn binomial_of_a_rate_matches_the_probability_mass_function() {
        // Chi-square goodness of fit of 50 000 draws against the exact Binomial(n, 1 - exp(-x))
        // mass function; 0.1 % critical values (chi-square quantiles from SciPy,
        // `scipy.stats.chi2.ppf(0.999, df)` for df = 1..30).
        let crit = [
            10.83, 13.82, 16.27, 18.47, 20.52, 22.46, 24.32, 26.12, 27.88, 29.59, 31.26, 32.91, 34.53, 36.12, 37.70,
            39.25, 40.79, 42.31, 43.82, 45.31, 46.80, 48.27, 49.73, 51.18, 52.62, 54.05, 55.48, 56.89, 58.30, 59.70,
        ];
        for &(n, x) in &[(1000u64, 1e-4f64), (200, 0.02), (10, 0.3), (5, 0.9)] {
            let mut s = stream(5, Domain::Tissue, n, 3);
            let c = counts(n, 50_000, || s.binomial_of_rate(n, x));
            let (chi, df) = binomial_chi_square(n, -(-x).exp_m1(), &c);
            assert!(df <= crit.len(), "{df} degrees of freedom");
            assert!(chi < crit[df - 1], "n {n} x {x}: chi2 {chi} on {df} df");
        }
    }

    #[test]
    fn small_mean_binomial_matches_the_probability_mass_function() {
        // Chi-square goodness of fit of 50 000 draws of Binomial(200, 0.05) against the exact
        // mass function; 0.1 % critical value.
        let (n, p) = (200u64, 0.05);
        let mut s = stream(4, Domain::Tissue, 1, 2);
        let c = counts(n, 50_000, || s.binomial(n, p));
        let (chi, df) = binomial_chi_square(n, p, &c);
        let dof = df as f64;
        // Wilson-Hilferty 0.999 quantile.
        let crit = dof * (1.0 - 2.0 / (9.0 * dof) + 3.090_232 * (2.0 / (9.0 * dof)).sqrt()).powi(3);
        assert!(chi < crit, "chi-square {chi} on {df} degrees of freedom, critical {crit}");
    }
}
