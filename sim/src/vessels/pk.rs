//! Plasma pharmacokinetics of a particle design: the circulating amount after intravenous
//! boluses and infusions, its elimination, and exact bookkeeping of what leaves into and returns from the tissue.
//!
//! Elimination models:
//!
//! - **Design** (one compartment, first order): renal filtration `k_r = k_r,max / (1 +
//!   exp((d - d_cut) / w))` for hydrodynamic diameter `d` around the renal cut-off `d_cut` (about
//!   5.5 nm; Choi et al. 2007, Nat Biotechnol 25:1165, and common practice), and phagocytic
//!   (mononuclear phagocyte system) clearance `k_m = k_m,0 (1 + (d / d_m)^n) exp(max(zeta, 0) /
//!   zeta_m) f_stealth`, rising with size and positive charge and lowered by a stealth coating
//!   (the trends are common practice; the functional form and defaults are this project's own
//!   rule of thumb, for demonstration).
//! - **Half-life**: a given elimination half-life, optionally with a distribution phase: the
//!   bi-exponential `C(t) = C0 (A e^(-alpha t) + B e^(-beta t))`, `A + B = 1`, is realised by a
//!   two-compartment model with `k21 = A beta + B alpha`, `k10 = alpha beta / k21`,
//!   `k12 = alpha + beta - k21 - k10` (Gibaldi and Perrier 1982, Pharmacokinetics, 2nd ed.,
//!   chapter 2).
//! - **Table**: a measured curve, interpolated log-linearly between samples (exponential decay
//!   within each interval) and extrapolated with the first and last intervals' rates; it sets the
//!   shape, the dose the scale. A rise between two samples is read as no elimination there. The
//!   curve is the response to one bolus; repeated boluses superpose it (linear
//!   pharmacokinetics): the particles of each bolus are kept apart ([`Cohort`]) and leave along
//!   the curve timed from their own bolus; an infusion is a bolus at the middle of each step it
//!   runs (the midpoint rule of the superposition integral `R int f(t - u) du`). Particles
//!   withdrawn into the tissue are taken from the cohorts, and those returned given to them, in
//!   proportion to their sizes.
//!
//! Doses follow the design's [`DoseSchedule`] (see [`crate::vessels::dosing`]). A bolus given at
//! the start of a step is eliminated over the whole step. Particles infused during a step
//! `[t, t + dt]` arrive at a constant rate, so the arrival time `u` of each is uniform over the
//! step; the probability that it is in compartment `i` at `t + dt` is the step average of the
//! model's transition probability, `(1/dt) int_0^dt P_i0(s) ds`: `(1 - e^(-k dt)) / (k dt)` in
//! plasma for one compartment, and the time integral of the transition matrix,
//! [`transition_integral`], for two. The infused counts are drawn with these exact probabilities
//! (not added at a point of the step), so the expected plasma amount at every step end is the
//! closed-form superposition of the doses' responses (superposition principle: a linear model's
//! response to a sum of inputs is the sum of its responses to each; Gibaldi and Perrier 1982,
//! Pharmacokinetics, 2nd ed., chapter 2 for the compartment models and the multiple-dosing
//! chapter for superposition; chapter numbers from memory) up to the rounding of whole particles
//! (less than one particle).
//!
//! Bookkeeping is in exact particle counts (u64): per step each particle in plasma is eliminated
//! with the exact probability of the model over the step, drawn as a binomial count from the
//! run's random streams, so `dose + returned = plasma + peripheral + cleared + withdrawn` holds
//! exactly at every step.

use std::path::Path;

use crate::error::{SimError, SimResult};
use crate::params::ParticlePlasmaParams;
use crate::rng::Stream;
use crate::scenario::{Coating, PlasmaModel};
use crate::units::{HOUR, MIN, ML};
use crate::vessels::dosing::DoseSchedule;

/// How plasma particles are eliminated.
#[derive(Debug, Clone, PartialEq)]
pub enum Elimination {
    /// One compartment: renal and phagocytic first-order rates, 1/s.
    Rates { renal: f64, phagocytic: f64 },
    /// Central (plasma) and peripheral compartments: elimination `k10` from plasma and exchange
    /// `k12`, `k21`, 1/s.
    TwoCompartment { k10: f64, k12: f64, k21: f64 },
    /// A measured curve.
    Table(PlasmaTable),
}

/// Renal and phagocytic clearance rates (1/s) that follow from a design.
pub fn design_rates(p: &ParticlePlasmaParams) -> (f64, f64) {
    let d = 2.0 * p.hydrodynamic_radius;
    let renal = p.renal_rate / (1.0 + ((d - p.renal_cutoff_diameter) / p.renal_cutoff_width).exp());
    let size = 1.0 + (d / p.mps_size_scale).powf(p.mps_size_exponent);
    let charge = (p.surface_potential.max(0.0) / p.mps_charge_scale).exp();
    let coat = match p.coating {
        Coating::Stealth => p.stealth_factor,
        Coating::None => 1.0,
    };
    (renal, p.mps_rate * size * charge * coat)
}

/// Rate constants of the two-compartment model with the bi-exponential of fraction `a` at the
/// fast rate `alpha` and `1 - a` at the slow rate `beta` (Gibaldi and Perrier 1982).
pub fn two_compartment(a: f64, alpha: f64, beta: f64) -> (f64, f64, f64) {
    let k21 = a * beta + (1.0 - a) * alpha;
    let k10 = alpha * beta / k21;
    let k12 = (alpha + beta - k21 - k10).max(0.0);
    (k10, k12, k21)
}

impl Elimination {
    /// The elimination of a design's plasma model (reads the table file for the table model).
    pub fn of(p: &ParticlePlasmaParams, plasma_volume: f64) -> SimResult<Self> {
        Ok(match p.model {
            PlasmaModel::Design => {
                let (renal, phagocytic) = design_rates(p);
                Elimination::Rates { renal, phagocytic }
            }
            PlasmaModel::HalfLife if p.distribution_fraction > 0.0 => {
                let (alpha, beta) =
                    (std::f64::consts::LN_2 / p.distribution_half_life, std::f64::consts::LN_2 / p.half_life);
                let (k10, k12, k21) = two_compartment(p.distribution_fraction, alpha, beta);
                Elimination::TwoCompartment { k10, k12, k21 }
            }
            PlasmaModel::HalfLife => {
                Elimination::Rates { renal: 0.0, phagocytic: std::f64::consts::LN_2 / p.half_life }
            }
            PlasmaModel::Table => Elimination::Table(PlasmaTable::read(&p.table_csv, p.dose, plasma_volume)?),
        })
    }

    /// Time for the plasma amount to halve from the bolus, s (without exchange with tissue).
    pub fn half_life(&self) -> f64 {
        match self {
            Elimination::Rates { renal, phagocytic } => std::f64::consts::LN_2 / (renal + phagocytic),
            Elimination::TwoCompartment { .. } => {
                // Bisection on the closed-form central amount.
                let (mut lo, mut hi) = (0.0, 1.0);
                while self.central_fraction(hi) > 0.5 {
                    hi *= 2.0;
                    if hi > 1e12 {
                        return f64::INFINITY;
                    }
                }
                for _ in 0..200 {
                    let m = 0.5 * (lo + hi);
                    if self.central_fraction(m) > 0.5 { lo = m } else { hi = m }
                }
                0.5 * (lo + hi)
            }
            Elimination::Table(t) => t.half_life(),
        }
    }

    /// Expected fraction of the bolus still in plasma at time `t` without exchange with tissue.
    pub fn central_fraction(&self, t: f64) -> f64 {
        match self {
            Elimination::Rates { renal, phagocytic } => (-(renal + phagocytic) * t).exp(),
            &Elimination::TwoCompartment { k10, k12, k21 } => transition(k10, k12, k21, t)[0][0],
            Elimination::Table(tab) => tab.fraction(t),
        }
    }
}

/// `exp(M t)` of the two-compartment system `x' = M x`, `x = (plasma, peripheral)`,
/// `M = [[-(k10 + k12), k21], [k12, -k21]]`: entry `[i][j]` is the probability that a particle in
/// compartment `j` at 0 is in compartment `i` at `t`. Closed form for a 2x2 matrix with real
/// distinct eigenvalues: `e^(s t) [cosh(q t) I + sinh(q t) / q (M - s I)]`.
pub fn transition(k10: f64, k12: f64, k21: f64, t: f64) -> [[f64; 2]; 2] {
    let (a, b, c, d) = (-(k10 + k12), k21, k12, -k21);
    let s = 0.5 * (a + d);
    let q = (0.25 * (a - d).powi(2) + b * c).sqrt();
    let e = (s * t).exp();
    let ch = (q * t).cosh();
    let sh = if q * t > 1e-8 { (q * t).sinh() / q } else { t };
    [[e * (ch + sh * (a - s)), e * sh * b], [e * sh * c, e * (ch + sh * (d - s))]]
}

/// `int_0^tau exp(M s) ds` of the two-compartment system of [`transition`]: entry `[i][j]`
/// divided by `tau` is the probability that a particle entering compartment `j` at a time
/// uniform in `[0, tau]` is in compartment `i` at `tau`. With eigenvalues `sigma +- q` and
/// `exp(M s) = e^(sigma s) (cosh(q s) I + sinh(q s) / q (M - sigma I))`, the integral is
/// `A I + B (M - sigma I)` with `A = (phi(sigma + q) + phi(sigma - q)) / 2`,
/// `B = (phi(sigma + q) - phi(sigma - q)) / (2 q)` and `phi(l) = (e^(l tau) - 1) / l`; for
/// `q tau` below 1e-5, `B = int_0^tau s e^(sigma s) ds` (relative error under 1e-10).
pub fn transition_integral(k10: f64, k12: f64, k21: f64, tau: f64) -> [[f64; 2]; 2] {
    let (a, b, c, d) = (-(k10 + k12), k21, k12, -k21);
    let s = 0.5 * (a + d);
    let q = (0.25 * (a - d).powi(2) + b * c).sqrt();
    let phi = |l: f64| if l * tau == 0.0 { tau } else { (l * tau).exp_m1() / l };
    let big_a = 0.5 * (phi(s + q) + phi(s - q));
    let big_b = if q * tau > 1e-5 {
        (phi(s + q) - phi(s - q)) / (2.0 * q)
    } else {
        let x = s * tau;
        if x.abs() < 1e-3 {
            tau * tau * (0.5 + x / 3.0 + x * x / 8.0 + x * x * x / 30.0)
        } else {
            (tau * x.exp() - phi(s)) / s
        }
    };
    [[big_a + big_b * (a - s), big_b * b], [big_b * c, big_a + big_b * (d - s)]]
}

/// The probability that a particle infused at a time uniform in a step of `x = k dt` rate
/// constants is eliminated by the step's end: `1 - (1 - e^(-x)) / x` (series below 1e-3).
fn infused_loss(x: f64) -> f64 {
    if x < 1e-3 { x * (0.5 - x * (1.0 / 6.0 - x * (1.0 / 24.0 - x / 120.0))) } else { (x + (-x).exp_m1()) / x }
}

/// A measured plasma curve: sample times (s) and the logarithm of the plasma amount relative to
/// its value at t = 0 (extrapolated when the first sample is later).
#[derive(Debug, Clone, PartialEq)]
pub struct PlasmaTable {
    pub time: Vec<f64>,
    pub ln_fraction: Vec<f64>,
}

impl PlasmaTable {
    /// A table from times (s, increasing) and positive values of any scale.
    pub fn new(time: Vec<f64>, values: &[f64]) -> Self {
        let mut ln: Vec<f64> = values.iter().map(|v| v.ln()).collect();
        // Value at t = 0: back-extrapolated along the first interval's exponential.
        let slope = (ln[1] - ln[0]) / (time[1] - time[0]);
        let ln0 = ln[0] - slope * time[0];
        for v in &mut ln {
            *v -= ln0;
        }
        PlasmaTable { time, ln_fraction: ln }
    }

    /// The plasma amount relative to t = 0 at time `t` (s).
    pub fn fraction(&self, t: f64) -> f64 {
        let (ts, ls) = (&self.time, &self.ln_fraction);
        let n = ts.len();
        let k = match ts.binary_search_by(|x| x.total_cmp(&t)) {
            Ok(i) => return ls[i].exp(),
            Err(i) => i.clamp(1, n - 1),
        };
        let (t0, t1, l0, l1) = (ts[k - 1], ts[k], ls[k - 1], ls[k]);
        (l0 + (l1 - l0) * (t - t0) / (t1 - t0)).exp()
    }

    /// First time the curve falls to half of its t = 0 value, s.
    pub fn half_life(&self) -> f64 {
        let target = -std::f64::consts::LN_2;
        let mut prev = (0.0, 0.0);
        for (&t, &l) in self.time.iter().zip(&self.ln_fraction) {
            if l <= target {
                return if l == prev.1 { t } else { prev.0 + (target - prev.1) * (t - prev.0) / (l - prev.1) };
            }
            prev = (t, l);
        }
        // Beyond the table: along the last interval.
        let n = self.time.len();
        let slope = (self.ln_fraction[n - 1] - self.ln_fraction[n - 2]) / (self.time[n - 1] - self.time[n - 2]);
        if slope >= 0.0 { f64::INFINITY } else { self.time[n - 1] + (target - self.ln_fraction[n - 1]) / slope }
    }

    /// Reads a table from CSV: a time column `time_h`, `time_min` or `time_s` and a value column
    /// `fraction_of_dose`, `percent_of_dose` or `particles_per_mL` (see DEVELOPERS.md).
    pub fn read(path: &Path, dose: u64, plasma_volume: f64) -> SimResult<Self> {
        let e = |what: String| SimError::Input { path: path.to_path_buf(), what };
        let text = std::fs::read_to_string(path).map_err(SimError::io(path, "cannot read the plasma table"))?;
        let mut rows = text.lines().enumerate().filter(|(_, l)| !l.trim().is_empty() && !l.trim().starts_with('#'));
        let (hl, head) = rows.next().ok_or_else(|| e("the plasma table is empty".into()))?;
        let names: Vec<&str> = head.split(',').map(str::trim).collect();
        if names.len() != 2 {
            return Err(e(format!("line {}: expected two columns (time, value), found {}", hl + 1, names.len())));
        }
        let tscale = match names[0] {
            "time_h" => HOUR,
            "time_min" => MIN,
            "time_s" => 1.0,
            other => {
                return Err(e(format!("line {}: time column `{other}`: expected time_h, time_min or time_s", hl + 1)));
            }
        };
        // Plasma amount per unit of the value column.
        let vscale = match names[1] {
            "fraction_of_dose" => 1.0,
            "percent_of_dose" => 0.01,
            "particles_per_mL" => plasma_volume / ML / dose.max(1) as f64,
            other => {
                return Err(e(format!(
                    "line {}: value column `{other}`: expected fraction_of_dose, percent_of_dose or particles_per_mL",
                    hl + 1
                )));
            }
        };
        let (mut time, mut vals) = (Vec::new(), Vec::new());
        for (i, l) in rows {
            let c: Vec<&str> = l.split(',').map(str::trim).collect();
            let line = i + 1;
            if c.len() != 2 {
                return Err(e(format!("line {line}: expected 2 values, found {}", c.len())));
            }
            let t: f64 = c[0].parse().map_err(|_| e(format!("line {line}: time {:?} is not a number", c[0])))?;
            let v: f64 = c[1].parse().map_err(|_| e(format!("line {line}: value {:?} is not a number", c[1])))?;
            if !(t.is_finite() && t >= 0.0) {
                return Err(e(format!("line {line}: time {t}: expected a time >= 0")));
            }
            if let Some(&last) = time.last()
                && t * tscale <= last
            {
                return Err(e(format!("line {line}: time {t}: expected times in increasing order")));
            }
            if !(v.is_finite() && v > 0.0) {
                return Err(e(format!("line {line}: value {v}: expected a concentration > 0")));
            }
            time.push(t * tscale);
            vals.push(v * vscale);
        }
        if time.len() < 2 {
            return Err(e(format!("the plasma table has {} sample(s): expected at least 2", time.len())));
        }
        Ok(PlasmaTable::new(time, &vals))
    }
}

/// The circulating particles of one species, in exact counts.
#[derive(Debug, Clone, PartialEq)]
pub struct PlasmaPool {
    pub name: String,
    /// Particles given so far.
    pub dose: u64,
    /// Particles in plasma now.
    pub amount: u64,
    /// Particles in the peripheral compartment (two-compartment model only).
    pub peripheral: u64,
    /// Particles eliminated from the body, all routes; of which by the kidney.
    pub cleared: u64,
    pub cleared_renal: u64,
    /// Particles withdrawn into the tissue and returned from it, cumulative.
    pub to_tissue: u64,
    pub from_tissue: u64,
    /// Blood and plasma volume, m^3.
    pub blood_volume: f64,
    pub plasma_volume: f64,
    pub elimination: Elimination,
    /// When the particles are given (a function of the scenario, not saved in checkpoints).
    pub schedule: DoseSchedule,
    /// Measured-curve model: the particles in plasma by the bolus that brought them, oldest
    /// first (the curve's clock runs from each bolus: repeated boluses superpose it); empty for
    /// the other models.
    pub cohorts: Vec<Cohort>,
}

/// Particles in plasma from one bolus of the measured-curve model.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Cohort {
    /// Time of the bolus, s.
    pub start: f64,
    pub amount: u64,
}

/// Shares of `k` among `amounts` in proportion (largest remainders, ties to the lower index):
/// exact in sum, and no share above its amount when `k` is at most their sum.
fn proportional(k: u64, amounts: impl Iterator<Item = u64> + Clone) -> Vec<u64> {
    let total: u128 = amounts.clone().map(u128::from).sum();
    if total == 0 {
        return amounts.map(|_| 0).collect();
    }
    let exact: Vec<(u64, u128)> = amounts
        .map(|a| {
            let x = u128::from(k) * u128::from(a);
            ((x / total) as u64, x % total)
        })
        .collect();
    let mut shares: Vec<u64> = exact.iter().map(|e| e.0).collect();
    let mut left = k - shares.iter().sum::<u64>();
    let mut by_remainder: Vec<usize> = (0..exact.len()).collect();
    by_remainder.sort_by(|&i, &j| exact[j].1.cmp(&exact[i].1).then(i.cmp(&j)));
    for i in by_remainder {
        if left == 0 {
            break;
        }
        if exact[i].1 > 0 {
            shares[i] += 1;
            left -= 1;
        }
    }
    shares
}

impl PlasmaPool {
    /// A pool after an intravenous bolus of `dose` particles at t = 0.
    pub fn bolus(name: &str, dose: u64, blood_volume: f64, plasma_volume: f64, elimination: Elimination) -> Self {
        Self::scheduled(name, DoseSchedule::single_bolus(dose), blood_volume, plasma_volume, elimination)
    }

    /// A pool at t = 0 of a design dosed by `schedule`: its boluses at t = 0 are in plasma.
    pub fn scheduled(
        name: &str,
        schedule: DoseSchedule,
        blood_volume: f64,
        plasma_volume: f64,
        elimination: Elimination,
    ) -> Self {
        let dose = schedule.initial();
        PlasmaPool {
            name: name.to_string(),
            dose,
            amount: dose,
            peripheral: 0,
            cleared: 0,
            cleared_renal: 0,
            to_tissue: 0,
            from_tissue: 0,
            blood_volume,
            plasma_volume,
            cohorts: match elimination {
                Elimination::Table(_) if dose > 0 => vec![Cohort { start: schedule.first_time(), amount: dose }],
                _ => Vec::new(),
            },
            elimination,
            schedule,
        }
    }

    /// Particles per m^3 of plasma.
    #[inline]
    pub fn concentration(&self) -> f64 {
        self.amount as f64 / self.plasma_volume
    }

    /// Takes up to `n` particles out of plasma into the tissue; returns how many were taken.
    pub fn withdraw(&mut self, n: u64) -> u64 {
        let k = n.min(self.amount);
        self.amount -= k;
        self.to_tissue += k;
        if !self.cohorts.is_empty() {
            let shares = proportional(k, self.cohorts.iter().map(|c| c.amount));
            for (c, x) in self.cohorts.iter_mut().zip(shares) {
                c.amount -= x;
            }
        }
        k
    }

    /// Puts `n` particles back into plasma from the tissue.
    pub fn give_back(&mut self, n: u64) {
        self.amount += n;
        self.from_tissue += n;
        // Returned particles join the boluses' cohorts in proportion (the newest when all are
        // empty).
        if self.cohorts.iter().all(|c| c.amount == 0) {
            if let Some(c) = self.cohorts.last_mut() {
                c.amount += n;
            }
        } else {
            let shares = proportional(n, self.cohorts.iter().map(|c| c.amount));
            for (c, x) in self.cohorts.iter_mut().zip(shares) {
                c.amount += x;
            }
        }
    }

    /// Whether `dose + returned = plasma + peripheral + cleared + withdrawn` (exactly), and the
    /// cohorts of a measured curve hold the plasma's particles.
    pub fn balanced(&self) -> bool {
        let gained = self.dose as u128 + self.from_tissue as u128;
        let held = self.amount as u128 + self.peripheral as u128 + self.cleared as u128 + self.to_tissue as u128;
        let cohorts = self.cohorts.is_empty() || self.cohorts.iter().map(|c| c.amount).sum::<u64>() == self.amount;
        gained == held && self.cleared_renal <= self.cleared && cohorts
    }

    /// Gives the step's doses and eliminates particles over `[t, t + dt]` (s) with the exact
    /// probabilities of the model: boluses due at `t` first, eliminated over the whole step, then
    /// the particles infused during the step with the step-averaged probabilities (module doc).
    pub fn step(&mut self, t: f64, dt: f64, s: &mut Stream) {
        if dt <= 0.0 {
            return;
        }
        let bolus = self.schedule.boluses_at(t, dt);
        self.amount += bolus;
        self.dose += bolus;
        if bolus > 0 && matches!(self.elimination, Elimination::Table(_)) {
            self.cohorts.push(Cohort { start: t, amount: bolus });
        }
        self.eliminate(t, dt, s);
        let infused = self.schedule.infused_over(t, dt);
        if infused > 0 {
            self.infuse(infused, t, dt, s);
        }
    }

    /// Adds `n` particles infused at a constant rate over `[t, t + dt]`, each in the compartment
    /// the step-averaged transition probabilities draw for it at `t + dt`.
    fn infuse(&mut self, n: u64, t: f64, dt: f64, s: &mut Stream) {
        self.dose += n;
        match &self.elimination {
            &Elimination::Rates { renal, phagocytic } => {
                let k = renal + phagocytic;
                let gone = if k > 0.0 { s.binomial(n, infused_loss(k * dt)) } else { 0 };
                let renal_gone = if gone > 0 { s.binomial(gone, renal / k) } else { 0 };
                self.amount += n - gone;
                self.cleared += gone;
                self.cleared_renal += renal_gone;
            }
            &Elimination::TwoCompartment { k10, k12, k21 } => {
                let p = transition_integral(k10, k12, k21, dt);
                let (pc, pp) = (p[0][0] / dt, p[1][0] / dt);
                let gone = s.binomial(n, (1.0 - pc - pp).max(0.0));
                let to_p = s.binomial(n - gone, pp / (pc + pp));
                self.amount += n - gone - to_p;
                self.peripheral += to_p;
                self.cleared += gone;
            }
            Elimination::Table(tab) => {
                // The step's infused particles count as a bolus at mid-step (the midpoint rule
                // of the superposition integral, second order in the step).
                let (f0, f1) = (tab.fraction(0.0), tab.fraction(0.5 * dt));
                let gone = s.binomial(n, if f0 > 0.0 { (1.0 - f1 / f0).clamp(0.0, 1.0) } else { 0.0 });
                self.amount += n - gone;
                self.cleared += gone;
                self.cohorts.push(Cohort { start: t + 0.5 * dt, amount: n - gone });
            }
        }
    }

    /// Eliminates the particles in the body at `t` over `[t, t + dt]`.
    fn eliminate(&mut self, t: f64, dt: f64, s: &mut Stream) {
        match &self.elimination {
            &Elimination::Rates { renal, phagocytic } => {
                let k = renal + phagocytic;
                if k <= 0.0 {
                    return;
                }
                let n = s.binomial(self.amount, -(-k * dt).exp_m1());
                let nr = s.binomial(n, renal / k);
                self.amount -= n;
                self.cleared += n;
                self.cleared_renal += nr;
            }
            &Elimination::TwoCompartment { k10, k12, k21 } => {
                let p = transition(k10, k12, k21, dt);
                let (nc, np) = (self.amount, self.peripheral);
                let gone_c = s.binomial(nc, (1.0 - p[0][0] - p[1][0]).max(0.0));
                let to_p = s.binomial(nc - gone_c, p[1][0] / (p[0][0] + p[1][0]));
                let gone_p = s.binomial(np, (1.0 - p[0][1] - p[1][1]).max(0.0));
                let to_c = s.binomial(np - gone_p, p[0][1] / (p[0][1] + p[1][1]));
                self.amount = nc - gone_c - to_p + to_c;
                self.peripheral = np - gone_p - to_c + to_p;
                self.cleared += gone_c + gone_p;
            }
            Elimination::Table(tab) => {
                // The measured curve is the response to one bolus: each bolus's particles leave
                // along it, timed from their bolus.
                let mut gone = 0;
                for c in &mut self.cohorts {
                    let (f0, f1) = (tab.fraction(t - c.start), tab.fraction(t + dt - c.start));
                    let p = if f0 > 0.0 { (1.0 - f1 / f0).clamp(0.0, 1.0) } else { 0.0 };
                    let n = s.binomial(c.amount, p);
                    c.amount -= n;
                    gone += n;
                }
                self.amount -= gone;
                self.cleared += gone;
            }
        }
    }
}
