//! Dose schedules of a particle design: intravenous boluses and constant infusions, in exact
//! particle counts, resolved from `[[particle.dose]]` (or `dose_particles`, one bolus at t = 0).
//!
//! What a step `[t, t + dt]` receives is a function of the clock alone, so a resumed run needs
//! no saved schedule state:
//!
//! - a bolus at `t_b > 0` is given at the start of the step that starts at `t_b` (the plasma
//!   process makes every dose time a step boundary); boluses at `t_b = 0` are in plasma from the
//!   start, before the first snapshot;
//! - an infusion of `N` particles over `[t0, t0 + T]` has given `floor(N (t - t0) / T)` by time
//!   `t` and exactly `N` from `t0 + T` on; a step receives the difference of that count at its two
//!   ends (cumulative rounding: the whole particles of the rate `R = N / T`, and the total exact).

use crate::units::HOUR;

/// One intravenous bolus: `particles` at `time` (s).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Bolus {
    pub time: f64,
    pub particles: u64,
}

/// A constant intravenous infusion of `particles` in all over `[start, start + duration]` (s).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Infusion {
    pub start: f64,
    pub duration: f64,
    pub particles: u64,
}

impl Infusion {
    /// End of the infusion, s.
    pub fn end(&self) -> f64 {
        self.start + self.duration
    }

    /// Rate, particles per second.
    pub fn rate(&self) -> f64 {
        self.particles as f64 / self.duration
    }

    /// Particles given by time `t` (s): `floor(N (t - t0) / T)`, exactly `N` from the end on.
    pub fn given_by(&self, t: f64) -> u64 {
        if t <= self.start {
            0
        } else if t >= self.end() - TOLERANCE * self.end().max(1.0) {
            self.particles
        } else {
            // Monotone in t (each float operation is), so a step never receives a negative count.
            ((self.particles as f64 * ((t - self.start) / self.duration)).floor() as u64).min(self.particles)
        }
    }

    /// Particles received over the step `[t, t + dt]`.
    pub fn over(&self, t: f64, dt: f64) -> u64 {
        self.given_by(t + dt) - self.given_by(t)
    }
}

/// Relative tolerance within which a time counts as a step boundary (the clock's own snapping).
const TOLERANCE: f64 = 1e-9;

/// The dose schedule of one particle design, boluses in time order.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct DoseSchedule {
    pub boluses: Vec<Bolus>,
    pub infusions: Vec<Infusion>,
}

impl DoseSchedule {
    /// One bolus of `particles` at t = 0.
    pub fn single_bolus(particles: u64) -> Self {
        DoseSchedule { boluses: vec![Bolus { time: 0.0, particles }], infusions: Vec::new() }
    }

    /// Resolves a validated `[[particle]]` table to SI: its `[[particle.dose]]` entries, or
    /// `dose_particles` (default 1e13) as one bolus at t = 0 when there are none.
    pub fn from_section(p: &crate::scenario::ParticleSection) -> Self {
        use crate::scenario::DoseKind;
        if p.dose.is_empty() {
            return Self::single_bolus(count(p.dose_particles.unwrap_or(DEFAULT_DOSE)));
        }
        let mut s = DoseSchedule::default();
        for d in &p.dose {
            let n = d.particles.map(count);
            match d.kind {
                DoseKind::Bolus => s.boluses.push(Bolus { time: d.at_h * HOUR, particles: n.unwrap_or(0) }),
                DoseKind::Repeated => {
                    let every = d.every_h.unwrap_or(0.0) * HOUR;
                    for j in 0..d.count.unwrap_or(1) {
                        let time = d.at_h * HOUR + f64::from(j) * every;
                        s.boluses.push(Bolus { time, particles: n.unwrap_or(0) });
                    }
                }
                DoseKind::Infusion => {
                    let hours = d.duration_h.unwrap_or(0.0);
                    let particles = n.unwrap_or_else(|| count(d.particles_per_h.unwrap_or(0.0) * hours));
                    s.infusions.push(Infusion { start: d.at_h * HOUR, duration: hours * HOUR, particles });
                }
            }
        }
        s.boluses.sort_by(|a, b| a.time.total_cmp(&b.time));
        s
    }

    /// Particles of the whole schedule.
    pub fn total(&self) -> u64 {
        self.boluses.iter().map(|b| b.particles).chain(self.infusions.iter().map(|i| i.particles)).sum()
    }

    /// Particles in plasma at t = 0 (boluses at 0).
    pub fn initial(&self) -> u64 {
        self.boluses.iter().filter(|b| b.time <= 0.0).map(|b| b.particles).sum()
    }

    /// Particles of the boluses given at the start of the step `[t, t + dt]`: those at
    /// `t_b > 0` with `t - eps <= t_b < t + dt - eps` (`eps` the clock's rounding), so that
    /// consecutive steps share each bolus out exactly once.
    pub fn boluses_at(&self, t: f64, dt: f64) -> u64 {
        let eps = TOLERANCE * t.abs().max(1.0);
        self.boluses
            .iter()
            .filter(|b| b.time > 0.0 && b.time >= t - eps && b.time < t + dt - eps)
            .map(|b| b.particles)
            .sum()
    }

    /// Particles every infusion gives over the step `[t, t + dt]`.
    pub fn infused_over(&self, t: f64, dt: f64) -> u64 {
        self.infusions.iter().map(|i| i.over(t, dt)).sum()
    }

    /// Times at which a step must end (bolus times, infusion starts and ends), s, increasing.
    pub fn breakpoints(&self) -> Vec<f64> {
        let mut v: Vec<f64> = self
            .boluses
            .iter()
            .map(|b| b.time)
            .chain(self.infusions.iter().flat_map(|i| [i.start, i.end()]))
            .filter(|&t| t > 0.0)
            .collect();
        v.sort_by(f64::total_cmp);
        v.dedup();
        v
    }

    /// Time of the first dose, s (0 for an empty schedule).
    pub fn first_time(&self) -> f64 {
        let b = self.boluses.iter().map(|b| b.time);
        b.chain(self.infusions.iter().map(|i| i.start)).min_by(f64::total_cmp).unwrap_or(0.0)
    }

    /// One line per entry, for the check report: what, how many particles, when.
    pub fn describe(&self) -> Vec<(String, u64, String)> {
        let h = |t: f64| crate::scenario::spec::human(t / HOUR);
        let mut out: Vec<(String, u64, String)> =
            self.boluses.iter().map(|b| ("bolus".to_string(), b.particles, format!("at {} h", h(b.time)))).collect();
        out.extend(self.infusions.iter().map(|i| {
            (
                "infusion".to_string(),
                i.particles,
                format!(
                    "from {} h to {} h, {} particles/h",
                    h(i.start),
                    h(i.end()),
                    crate::scenario::spec::human(i.rate() * HOUR)
                ),
            )
        }));
        out
    }
}

/// Particles of the default bolus at t = 0 when a design gives no dose.
pub const DEFAULT_DOSE: f64 = 1.0e13;

/// A validated particle count (at most 1e19) as an exact count.
fn count(x: f64) -> u64 {
    x.round() as u64
}
