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
    #[cfg(feature = "draw-census")]
    census::opened();
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
        #[cfg(feature = "draw-census")]
        census::opened();
        Stream(self.key(id, step))
    }
}

/// Right edge of the base layer of the 256-layer normal ziggurat (Marsaglia and Tsang 2000).
const ZIGGURAT_R: f64 = 3.654_152_885_361_009;
/// Area of each layer of that ziggurat (same source).
const ZIGGURAT_V: f64 = 4.928_673_233_99e-3;

/// Layer edges `x[i]` (decreasing, `x[1] = r`, `x[256] = 0`, `x[0] = v / f(r)` the pseudo-width
/// of the base layer with its tail) and the unnormalised density `f = exp(-x^2 / 2)` there.
struct Ziggurat {
    x: [f64; 257],
    f: [f64; 257],
}

/// The normal ziggurat's tables, built once: each layer `i` has area `x[i] (f[i + 1] - f[i]) = v`.
fn ziggurat() -> &'static Ziggurat {
    static TABLES: std::sync::OnceLock<Ziggurat> = std::sync::OnceLock::new();
    TABLES.get_or_init(|| {
        let pdf = |x: f64| (-0.5 * x * x).exp();
        let mut x = [0.0; 257];
        x[0] = ZIGGURAT_V / pdf(ZIGGURAT_R);
        x[1] = ZIGGURAT_R;
        for i in 1..255 {
            x[i + 1] = (-2.0 * (ZIGGURAT_V / x[i] + pdf(x[i])).ln()).sqrt();
        }
        x[256] = 0.0;
        let mut f = [0.0; 257];
        for i in 0..257 {
            f[i] = pdf(x[i]);
        }
        Ziggurat { x, f }
    })
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

    /// One standard normal deviate, by the ziggurat method (Marsaglia and Tsang 2000, "The
    /// ziggurat method for generating random variables", J Stat Softw 5(8), 256 layers, their
    /// `r` and `v`): one 64-bit draw and a table look-up in about 99 % of calls, an exponential
    /// for the wedges and Marsaglia's (1964) exact sampling of the tail beyond `r`. The layer
    /// index and the abscissa come from disjoint bits of the draw, so they are independent (the
    /// correlation Doornik 2005 found in the 32-bit original does not arise).
    #[inline]
    pub fn normal(&mut self) -> f64 {
        let z = ziggurat();
        loop {
            let bits = self.next_u64();
            let i = (bits & 0xff) as usize;
            // Uniform on (-1, 1), symmetric, from the top 53 bits.
            let u = ((bits >> 11) as f64 + 0.5) * (1.0 / (1u64 << 52) as f64) - 1.0;
            let x = u * z.x[i];
            if x.abs() < z.x[i + 1] {
                return x;
            }
            if i == 0 {
                // The tail beyond r (Marsaglia 1964): x = r + E1 / r, kept when 2 E2 > (E1 / r)^2.
                loop {
                    let a = -self.uniform_open0().ln() / ZIGGURAT_R;
                    let b = -self.uniform_open0().ln();
                    if 2.0 * b > a * a {
                        return if u < 0.0 { -(ZIGGURAT_R + a) } else { ZIGGURAT_R + a };
                    }
                }
            }
            if z.f[i + 1] + (z.f[i] - z.f[i + 1]) * self.uniform() < (-0.5 * x * x).exp() {
                return x;
            }
        }
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

    /// Binomial deviate: number of successes in `n` trials of probability `p`, exact.
    ///
    /// With `q = min(p, 1 - p)`: small means (`n q < 10`) by inversion with the probability
    /// recurrence (the BINV algorithm of Kachitvichyanukul and Schmeiser 1988, Commun ACM
    /// 31:216): one uniform and a few multiplications per unit of the mean; larger means by
    /// transformed rejection (BTRD, Hormann 1993, below), constant expected time. Both are
    /// exact; BTRD needs `n p >= 10`, so the switch is at a mean of 10 (the domain Hormann gives
    /// for it, quoted from memory).
    pub fn binomial(&mut self, n: u64, p: f64) -> u64 {
        if n == 0 || p <= 0.0 {
            return 0;
        }
        #[cfg(feature = "draw-census")]
        census::drawn(census::Draw::Probability(n, p));
        if p >= 1.0 {
            return n;
        }
        if n <= 16 {
            return (0..n).filter(|_| self.chance(p)).count() as u64;
        }
        let (q, flip) = if p > 0.5 { (1.0 - p, true) } else { (p, false) };
        let k = if (n as f64) * q < BTRD_MIN_MEAN {
            let u = self.uniform();
            // No success when u <= (1 - q)^n, which is at least 1 - n q (Bernoulli's inequality):
            // below that bound, less a margin for rounding, the mass needs no logarithm.
            if u <= surely_below(1.0 - n as f64 * q) {
                0
            } else {
                binomial_inversion(u, n, (n as f64 * (-q).ln_1p()).exp(), q / (1.0 - q))
            }
        } else {
            self.btrd(n, q)
        };
        if flip { n - k } else { k }
    }

    /// BTRD (Hormann 1993, "The generation of binomial random variates", J Stat Comput Simul
    /// 46:101, algorithm BTRD) for `p <= 1/2` and `n p >= 10`: transformed rejection with a
    /// quick acceptance region that takes a share `0.86 v_r` of the draws with one uniform
    /// (`v_r = 0.92 - 4.2 / b`: about 0.46 at a mean of 15, 0.69 at 250); the rest are accepted
    /// by the exact ratio of the mass function to its mode's, by recurrence near the mode, by a
    /// squeeze, or by Stirling's series.
    #[inline(never)]
    fn btrd(&mut self, n: u64, p: f64) -> u64 {
        let nf = n as f64;
        let q = 1.0 - p;
        let m = ((nf + 1.0) * p).floor();
        let r = p / q;
        let nr = (nf + 1.0) * r;
        let npq = nf * p * q;
        let sqrt_npq = npq.sqrt();
        let b = 1.15 + 2.53 * sqrt_npq;
        let a = -0.0873 + 0.0248 * b + 0.01 * p;
        let c = nf * p + 0.5;
        let inv_b = 1.0 / b;
        let alpha = (2.83 + 5.1 * inv_b) * sqrt_npq;
        let v_r = 0.92 - 4.2 * inv_b;
        let inv_v_r = 1.0 / v_r;
        let u_rv_r = 0.86 * v_r;
        loop {
            // Step 1: the quick acceptance region.
            let mut v = self.uniform();
            if v <= u_rv_r {
                let u = v * inv_v_r - 0.43;
                return ((2.0 * a / (0.5 - u.abs()) + b) * u + c).floor() as u64;
            }
            // Step 2: a point of the hat outside that region.
            let u = if v >= v_r {
                self.uniform() - 0.5
            } else {
                let u = v * inv_v_r - 0.93;
                v = self.uniform() * v_r;
                0.5f64.copysign(u) - u
            };
            // Step 3.0: its candidate and the hat's height there.
            let us = 0.5 - u.abs();
            let k = ((2.0 * a / us + b) * u + c).floor();
            if k < 0.0 || k > nf {
                continue;
            }
            v *= alpha / (a / (us * us) + b);
            let km = (k - m).abs();
            if km <= 15.0 {
                // Step 3.1: f(k) / f(m) by the recurrence f(i) / f(i - 1) = (n + 1) r / i - r.
                let mut f = 1.0;
                if m < k {
                    let mut i = m + 1.0;
                    while i <= k {
                        f *= nr / i - r;
                        i += 1.0;
                    }
                } else if m > k {
                    let mut i = k + 1.0;
                    while i <= m {
                        v *= nr / i - r;
                        i += 1.0;
                    }
                }
                if v <= f {
                    return k as u64;
                }
                continue;
            }
            // Step 3.2: squeeze on the logarithm.
            let v = v.ln();
            let rho = (km / npq) * (((km / 3.0 + 0.625) * km + 1.0 / 6.0) / npq + 0.5);
            let t = -km * km / (2.0 * npq);
            if v < t - rho {
                return k as u64;
            }
            if v > t + rho {
                continue;
            }
            // Steps 3.3 and 3.4: the exact log ratio with Stirling's corrections.
            let nm = nf - m + 1.0;
            let h = (m + 0.5) * ((m + 1.0) / (r * nm)).ln() + stirling_tail(m) + stirling_tail(nf - m);
            let nk = nf - k + 1.0;
            if v <= h + (nf + 1.0) * (nm / nk).ln() + (k + 0.5) * (nk * r / (k + 1.0)).ln()
                - stirling_tail(k)
                - stirling_tail(nf - k)
            {
                return k as u64;
            }
        }
    }
}

/// Mean `n min(p, 1 - p)` from which [`Stream::binomial`] uses BTRD rather than inversion.
const BTRD_MIN_MEAN: f64 = 10.0;

/// `ln(k!) - [(k + 1/2) ln(k + 1) - (k + 1) + ln(2 pi) / 2]`, the tail of Stirling's series for
/// `ln(k!)`: tabulated below 10 (values of `math.lgamma` in Python), else the series' first
/// three terms (as BTRD uses them, Hormann 1993).
#[inline]
fn stirling_tail(k: f64) -> f64 {
    const TABLE: [f64; 10] = [
        0.081_061_466_795_327_33,
        0.041_340_695_955_409_46,
        0.027_677_925_684_997_717,
        0.020_790_672_103_765_84,
        0.016_644_691_189_820_815,
        0.013_876_128_823_072_431,
        0.011_896_709_945_892_87,
        0.010_411_265_261_973_224,
        0.009_255_462_182_709_007,
        0.008_330_563_433_359_028,
    ];
    if k < 10.0 {
        return TABLE[k as usize];
    }
    let k1 = k + 1.0;
    let k2 = k1 * k1;
    (1.0 / 12.0 - (1.0 / 360.0 - 1.0 / (1260.0 * k2)) / k2) / k1
}

impl Stream {
    /// Binomial deviate of `n` trials whose success probability is `1 - exp(-x)` (a first-order
    /// rate times a time step, `x >= 0`): the probability mass at zero is then exactly
    /// `exp(-n x)`, so the common draw of no success costs one uniform and at most one
    /// exponential (none when the uniform falls below `1 - n x <= exp(-n x)`).
    /// Small means by inversion (BINV, Kachitvichyanukul and Schmeiser 1988) started from that
    /// mass, with ratio `p / (1 - p) = exp(x) - 1`; otherwise as [`Stream::binomial`].
    pub fn binomial_of_rate(&mut self, n: u64, x: f64) -> u64 {
        if n == 0 || x <= 0.0 {
            return 0;
        }
        #[cfg(feature = "draw-census")]
        census::drawn(census::Draw::Rate(n, x));
        // p > 1/2 exactly when x > ln 2, and n p <= n x: the test needs no p.
        if x > std::f64::consts::LN_2 || n as f64 * x >= BTRD_MIN_MEAN {
            #[cfg(feature = "draw-census")]
            let _inner = census::Inner::enter();
            return self.binomial(n, -(-x).exp_m1());
        }
        let u = self.uniform();
        if u <= surely_below(1.0 - n as f64 * x) {
            return 0;
        }
        let p0 = (-(n as f64) * x).exp();
        if u <= p0 {
            return 0;
        }
        binomial_inversion(u, n, p0, x.exp_m1())
    }
}

/// A lower bound `b` of the zero mass of an inversion (`1 - n x <= exp(-n x)`, or
/// `1 - n q <= (1 - q)^n`, used where it is positive, so the exponent is below 1 in size),
/// lowered by `2^-48`: the computed mass (`exp(-n x)` or `exp(n ln(1 - q))` from the C
/// library) is within a few units of `2^-53` of the exact one, which is at least `b`, so a
/// uniform at or below the result is at or below the computed mass too. The squeeze changes no
/// draw; it spares the exponential (and logarithm) of most draws with a small mean.
#[inline]
fn surely_below(b: f64) -> f64 {
    b - 16.0 * f64::EPSILON
}

/// Inversion of the binomial distribution function by sequential search from `k = 0` (BINV):
/// uniform `u`, `n` trials, mass at zero `p0`, odds `r = p / (1 - p)`. The recurrence `p(k + 1) = p(k) r (n - k) / (k + 1)` multiplies by tabulated reciprocals
/// (the search rarely passes k = 40 below a mean of 10), so each step costs no division.
#[inline]
fn binomial_inversion(mut u: f64, n: u64, p0: f64, r: f64) -> u64 {
    const RECIPROCALS: [f64; 64] = {
        let mut t = [0.0; 64];
        let mut i = 0;
        while i < 64 {
            t[i] = 1.0 / (i as f64 + 1.0);
            i += 1;
        }
        t
    };
    let mut pk = p0;
    let mut k = 0u64;
    let mut left = n as f64;
    while u > pk && k < n {
        u -= pk;
        let inv = if k < 64 { RECIPROCALS[k as usize] } else { 1.0 / (k + 1) as f64 };
        pk *= r * left * inv;
        left -= 1.0;
        k += 1;
        if pk <= 0.0 {
            break;
        }
    }
    k
}

/// A census of the binomial draws and stream openings of the engine while recording (feature
/// `draw-census`, for `benches/draw_census.rs`, which replays them to measure what the draws
/// alone cost). Without the feature none of it is compiled.
#[cfg(feature = "draw-census")]
pub mod census {
    use std::cell::Cell;
    use std::sync::Mutex;
    use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};

    /// One binomial draw: `binomial_of_rate(n, x)` or `binomial(n, p)`.
    #[derive(Debug, Clone, Copy, PartialEq)]
    pub enum Draw {
        Rate(u64, f64),
        Probability(u64, f64),
    }

    static RECORDING: AtomicBool = AtomicBool::new(false);
    static DRAWS: Mutex<Vec<Draw>> = Mutex::new(Vec::new());
    static OPENED: AtomicU64 = AtomicU64::new(0);
    thread_local! {
        /// Inside a `binomial_of_rate` that calls `binomial`: that inner call is the same draw.
        static INNER: Cell<bool> = const { Cell::new(false) };
    }

    /// Starts recording (clears what was recorded).
    pub fn start() {
        DRAWS.lock().expect("census").clear();
        OPENED.store(0, Ordering::Relaxed);
        RECORDING.store(true, Ordering::Relaxed);
    }

    /// Stops recording; returns the draws (in no particular order) and the streams opened.
    pub fn stop() -> (Vec<Draw>, u64) {
        RECORDING.store(false, Ordering::Relaxed);
        (std::mem::take(&mut *DRAWS.lock().expect("census")), OPENED.load(Ordering::Relaxed))
    }

    pub(super) fn opened() {
        if RECORDING.load(Ordering::Relaxed) {
            OPENED.fetch_add(1, Ordering::Relaxed);
        }
    }

    pub(super) fn drawn(d: Draw) {
        if RECORDING.load(Ordering::Relaxed) && !INNER.with(Cell::get) {
            DRAWS.lock().expect("census").push(d);
        }
    }

    /// Marks the calls below as part of an outer draw until dropped.
    pub(super) struct Inner;

    impl Inner {
        pub(super) fn enter() -> Self {
            INNER.with(|f| f.set(true));
            Inner
        }
    }

    impl Drop for Inner {
        fn drop(&mut self) {
            INNER.with(|f| f.set(false));
        }
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
    fn the_squeeze_of_small_means_changes_no_draw() {
        // The inversions without the squeeze (the zero mass computed every time) must give the
        // same draw from the same stream, at means where the squeeze decides most draws.
        for &(n, x) in &[(1u64, 1e-3), (17, 1e-4), (1000, 2e-5), (1000, 5e-4), (3, 0.2), (100_000, 1e-9)] {
            for id in 0..20_000u64 {
                let mut a = stream(5, Domain::Binding, id, n);
                let mut b = a.clone();
                let p0 = (-(n as f64) * x).exp();
                let u = b.uniform();
                let want = if u <= p0 { 0 } else { binomial_inversion(u, n, p0, x.exp_m1()) };
                assert_eq!(a.binomial_of_rate(n, x), want, "n {n} x {x} stream {id}");
            }
        }
        for &(n, p) in &[(17u64, 0.999_95f64), (40, 0.9999), (200, 1e-4), (5000, 1e-5)] {
            for id in 0..20_000u64 {
                let mut a = stream(6, Domain::Binding, id, n);
                let mut b = a.clone();
                let (q, flip) = if p > 0.5 { (1.0 - p, true) } else { (p, false) };
                let u = b.uniform();
                let k = binomial_inversion(u, n, (n as f64 * (-q).ln_1p()).exp(), q / (1.0 - q));
                let want = if flip { n - k } else { k };
                assert_eq!(a.binomial(n, p), want, "n {n} p {p} stream {id}");
            }
        }
    }

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
mod normal_tests {
    use super::*;

    #[test]
    fn ziggurat_tables_close_on_the_apex() {
        // Each layer has area v by construction; the last one must then reach x = 0 with the
        // density's apex f = 1 (Marsaglia and Tsang 2000: r and v are chosen so that it does).
        let z = ziggurat();
        let last = z.x[255] * (1.0 - z.f[255]);
        assert!((last - ZIGGURAT_V).abs() < 1e-9, "top layer area {last}");
        assert!(z.x.windows(2).all(|w| w[0] > w[1]));
    }

    #[test]
    fn normal_matches_the_distribution_function_into_the_tail() {
        // Chi-square goodness of fit of 2e6 draws in 12 cells bounded by standard normal
        // quantiles (SciPy `scipy.stats.norm.ppf` at 1e-4, 1e-3, 1e-2, 0.1, 0.25, 0.5 and their
        // mirrors), so the two outer cells lie wholly in the tail beyond r; 0.1 % critical
        // value on 11 degrees of freedom, `scipy.stats.chi2.ppf(0.999, 11)` = 31.26.
        let q = [3.719_016_485_455_680_4, 3.090_232_306_167_813, 2.326_347_874_040_840_8, 1.281_551_565_544_600_4];
        let edges = [
            -q[0],
            -q[1],
            -q[2],
            -q[3],
            -0.674_489_750_196_081_7,
            0.0,
            0.674_489_750_196_081_7,
            q[3],
            q[2],
            q[1],
            q[0],
        ];
        let probs = [1e-4, 9e-4, 9e-3, 0.09, 0.15, 0.25, 0.25, 0.15, 0.09, 9e-3, 9e-4, 1e-4];
        let n = 2_000_000;
        let mut counts = [0f64; 12];
        let mut s = stream(9, Domain::Tissue, 1, 1);
        for _ in 0..n {
            let x = s.normal();
            counts[edges.iter().filter(|&&e| x >= e).count()] += 1.0;
        }
        let chi: f64 = counts.iter().zip(probs).map(|(o, p)| (o - p * n as f64).powi(2) / (p * n as f64)).sum();
        assert!(chi < 31.26, "chi-square {chi}, counts {counts:?}");
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

    /// The 0.999 quantile of the chi-square distribution on `df` degrees of freedom by the
    /// Wilson-Hilferty approximation (Wilson and Hilferty 1931; 3.090232 is the standard
    /// normal's 0.999 quantile, `scipy.stats.norm.ppf(0.999)`).
    fn chi_square_999(df: usize) -> f64 {
        let dof = df as f64;
        dof * (1.0 - 2.0 / (9.0 * dof) + 3.090_232 * (2.0 / (9.0 * dof)).sqrt()).powi(3)
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
    fn btrd_binomial_matches_the_probability_mass_function() {
        // Chi-square goodness of fit of 100 000 draws per case against the exact mass function,
        // for means from just above BTRD's threshold to a few hundred and for p > 1/2 (drawn
        // through n - Binomial(n, 1 - p)); 0.1 % critical values by `chi_square_999`.
        for &(n, p) in &[(100u64, 0.12f64), (60, 0.42), (400, 0.15), (1000, 0.25), (200, 0.9), (2000, 0.02)] {
            let mut s = stream(6, Domain::Tissue, n, 8);
            let c = counts(n, 100_000, || s.binomial(n, p));
            let (chi, df) = binomial_chi_square(n, p, &c);
            let crit = chi_square_999(df);
            assert!(chi < crit, "n {n} p {p}: chi-square {chi} on {df} degrees of freedom, critical {crit}");
        }
        // And through the rate-given form above its inversion range.
        let (n, x) = (1000u64, 0.03);
        let mut s = stream(6, Domain::Tissue, 1, 9);
        let c = counts(n, 100_000, || s.binomial_of_rate(n, x));
        let (chi, df) = binomial_chi_square(n, -(-x).exp_m1(), &c);
        let crit = chi_square_999(df);
        assert!(chi < crit, "rate form: chi-square {chi} on {df} degrees of freedom, critical {crit}");
    }

    #[test]
    fn small_mean_binomial_matches_the_probability_mass_function() {
        // Chi-square goodness of fit of 50 000 draws of Binomial(200, 0.05) against the exact
        // mass function; 0.1 % critical value by `chi_square_999`.
        let (n, p) = (200u64, 0.05);
        let mut s = stream(4, Domain::Tissue, 1, 2);
        let c = counts(n, 50_000, || s.binomial(n, p));
        let (chi, df) = binomial_chi_square(n, p, &c);
        let crit = chi_square_999(df);
        assert!(chi < crit, "chi-square {chi} on {df} degrees of freedom, critical {crit}");
    }
}
