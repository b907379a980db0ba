//! Dose schedules: plasma curves of repeated boluses and constant infusions against the
//! closed-form superposition of the doses' responses (superposition principle: the plasma amount
//! of a linear model after several inputs is the sum of its responses to each; Gibaldi and
//! Perrier 1982, Pharmacokinetics, 2nd ed., chapter 2 for the compartment models and the
//! multiple-dosing chapter for superposition; chapter numbers from memory), for one- and
//! two-compartment elimination; exact counts and balances; steps landing on dose times;
//! validation of `[[particle.dose]]`.
//!
//! Tolerance of the curves: every particle's fate is independent of the others', so the plasma
//! count at a time is a sum of independent Bernoulli variables whose variance `sum p (1 - p)` is
//! at most its mean `E`; the infused counts are whole particles of the rate with cumulative
//! rounding, which moves the expected amount by less than one particle. We allow
//! `6 sqrt(E) + 2` particles at every step end (about 1e-5 of a 1e12 dose).

use std::path::Path;

use interstice_sim::process::plasma::PlasmaPools;
use interstice_sim::rng::{Domain, stream};
use interstice_sim::vessels::dosing::{Bolus, DoseSchedule, Infusion};
use interstice_sim::vessels::pk::{
    Elimination, PlasmaPool, PlasmaTable, transition, transition_integral, two_compartment,
};
use interstice_sim::world::{Breakpoints, Clock};
use interstice_sim::{LoadedScenario, Simulation};

const H: f64 = 3600.0;

/// Steps a pool to `end` with steps of at most `dt` that end on the schedule's dose times (as
/// the engine's breakpoints make them), checking the balance every step; returns (time, plasma,
/// peripheral) at every step end.
fn run(pool: &mut PlasmaPool, end: f64, dt: f64, seed: u64) -> Vec<(f64, f64, f64)> {
    let breaks = pool.schedule.breakpoints();
    let (mut t, mut step, mut out) = (0.0, 0u64, Vec::new());
    while t < end {
        let next = breaks.iter().copied().find(|&b| b > t + 1e-9).unwrap_or(f64::INFINITY).min(end);
        let h = dt.min(next - t);
        let mut s = stream(seed, Domain::Plasma, 1, step);
        pool.step(t, h, &mut s);
        assert!(pool.balanced(), "unbalanced at {t}: {pool:?}");
        t = if (t + h - next).abs() < 1e-9 { next } else { t + h };
        step += 1;
        out.push((t, pool.amount as f64, pool.peripheral as f64));
    }
    out
}

fn assert_close(what: &str, t: f64, got: f64, want: f64) {
    let tol = 6.0 * want.max(0.0).sqrt() + 2.0;
    assert!((got - want).abs() <= tol, "{what} at {} h: {got} vs closed form {want} (tolerance {tol})", t / H);
}

/// The closed forms are read at step ends, where a bolus at `t_i` is not yet given (the step that
/// starts at `t_i` gives it): they count a bolus from just after its time.
///
/// One compartment: a bolus `D` at `t_i` contributes `D e^(-k (t - t_i))`; an infusion at rate
/// `R` over `[t0, t0 + T]` contributes `R/k (1 - e^(-k (t - t0)))` during it and that value at
/// `t0 + T` times `e^(-k (t - t0 - T))` after (Gibaldi and Perrier 1982, chapter 2, from memory).
fn one_compartment(s: &DoseSchedule, k: f64, t: f64) -> f64 {
    let mut c = 0.0;
    for b in &s.boluses {
        if t > b.time {
            c += b.particles as f64 * (-k * (t - b.time)).exp();
        }
    }
    for i in &s.infusions {
        let r = i.rate();
        if t > i.start {
            let during = (t - i.start).min(i.duration);
            c += r / k * -(-k * during).exp_m1() * (-k * (t - i.start - during)).exp();
        }
    }
    c
}

/// Two compartments with plasma curve `A e^(-alpha t) + B e^(-beta t)` after a unit bolus
/// (`A + B = 1`): boluses superpose that curve, an infusion at rate `R` its time integral,
/// `R sum_j A_j / l_j (1 - e^(-l_j tau))` over the time `tau` it has run, decayed after it ends
/// (Gibaldi and Perrier 1982, chapter 2, from memory).
fn two_compartment_curve(s: &DoseSchedule, a: f64, alpha: f64, beta: f64, t: f64) -> f64 {
    let terms = [(a, alpha), (1.0 - a, beta)];
    let mut c = 0.0;
    for b in &s.boluses {
        if t > b.time {
            c += b.particles as f64 * terms.iter().map(|&(w, l)| w * (-l * (t - b.time)).exp()).sum::<f64>();
        }
    }
    for i in &s.infusions {
        if t > i.start {
            let during = (t - i.start).min(i.duration);
            let after = t - i.start - during;
            c += i.rate()
                * terms.iter().map(|&(w, l)| w / l * -(-l * during).exp_m1() * (-l * after).exp()).sum::<f64>();
        }
    }
    c
}

#[test]
fn repeated_boluses_follow_the_superposition_of_one_compartment_decays() {
    let k = std::f64::consts::LN_2 / (2.0 * H);
    let e = Elimination::Rates { renal: 0.3 * k, phagocytic: 0.7 * k };
    // A bolus at 0 and four more every 3 h from 0.5 h, with a step (70 s) that divides none of them.
    let mut s = DoseSchedule { boluses: vec![Bolus { time: 0.0, particles: 1_000_000_000_000 }], infusions: vec![] };
    s.boluses.extend((0..4).map(|j| Bolus { time: (0.5 + 3.0 * f64::from(j)) * H, particles: 500_000_000_000 }));
    let mut pool = PlasmaPool::scheduled("p", s.clone(), 2e-6, 1.1e-6, e);
    assert_eq!(pool.dose, 1_000_000_000_000, "the bolus at 0 is in plasma from the start");
    let curve = run(&mut pool, 14.0 * H, 70.0, 3);
    for &(t, amount, _) in &curve {
        assert_close("plasma", t, amount, one_compartment(&s, k, t));
    }
    assert_eq!(pool.dose, s.total());
    assert!(pool.cleared_renal > 0 && pool.cleared_renal < pool.cleared);
    // Just before and at a bolus time the curve jumps by the bolus: the bolus at 3.5 h is given by
    // the step that starts at 3.5 h.
    let at = curve.iter().position(|c| (c.0 - 3.5 * H).abs() < 1e-6).expect("a step ends at 3.5 h");
    let jump = curve[at + 1].1 - curve[at].1 * (-k * (curve[at + 1].0 - curve[at].0)).exp();
    assert!((jump - 5e11 * (-k * (curve[at + 1].0 - curve[at].0)).exp()).abs() < 5e6, "{jump}");
}

/// A measured curve sampled from a bi-exponential (a third falling at 1.5/h, the rest at
/// 0.08/h) at blood-draw times up to 16 h.
fn measured_curve() -> PlasmaTable {
    let f = |t_h: f64| 0.35 * (-t_h * 1.5).exp() + 0.65 * (-t_h * 0.08).exp();
    let times: Vec<f64> = [0.0, 0.25, 0.5, 1.0, 2.0, 3.0, 4.0, 6.0, 9.0, 12.0, 16.0].iter().map(|h| h * H).collect();
    let values: Vec<f64> = times.iter().map(|&t| f(t / H)).collect();
    PlasmaTable::new(times, &values)
}

#[test]
fn repeated_boluses_superpose_a_measured_plasma_curve() {
    // A measured curve is the response to one bolus; with linear pharmacokinetics n boluses give
    // sum_i D_i f(t - t_i) (the superposition principle, as above). The curve here is sampled
    // from a bi-exponential, so each bolus's particles must leave along it from their own bolus
    // time: a pool that aged every particle from the first bolus would fall far too fast.
    let table = measured_curve();
    let mut s = DoseSchedule { boluses: vec![Bolus { time: 0.0, particles: 1_000_000_000_000 }], infusions: vec![] };
    s.boluses.extend((0..3).map(|j| Bolus { time: (2.0 + 3.0 * f64::from(j)) * H, particles: 700_000_000_000 }));
    let mut pool = PlasmaPool::scheduled("p", s.clone(), 2e-6, 1.1e-6, Elimination::Table(table.clone()));
    let curve = run(&mut pool, 14.0 * H, 120.0, 5);
    let want = |t: f64| -> f64 {
        s.boluses.iter().filter(|b| t > b.time).map(|b| b.particles as f64 * table.fraction(t - b.time)).sum()
    };
    for &(t, amount, _) in &curve {
        assert_close("plasma", t, amount, want(t));
    }
    assert_eq!(pool.cohorts.len(), 4);
    // Particles withdrawn into the tissue leave every cohort in proportion, and those returned
    // join them in proportion: the counts stay exact.
    let before: Vec<u64> = pool.cohorts.iter().map(|c| c.amount).collect();
    let taken = pool.withdraw(pool.amount / 3);
    let after: Vec<u64> = pool.cohorts.iter().map(|c| c.amount).collect();
    for (b, a) in before.iter().zip(&after) {
        let share = (b - a) as f64 / taken as f64;
        let expected = *b as f64 / before.iter().sum::<u64>() as f64;
        assert!((share - expected).abs() < 1e-9, "{share} vs {expected}");
    }
    pool.give_back(taken / 2);
    assert!(pool.balanced());
    assert_eq!(pool.cohorts.iter().map(|c| c.amount).sum::<u64>(), pool.amount);
}

#[test]
fn an_infusion_superposes_a_measured_plasma_curve() {
    // Superposition for an infusion at rate R over [t0, t0 + T]: R int f(t - u) du over the time it
    // has run (as above). The pool counts each step's infused particles as a bolus at mid-step
    // (the midpoint rule): its expected amount sum_steps n_k f(t - mid_k) is checked against the
    // draws at 6 sqrt(E) + 2 particles, and against the integral (Simpson, 4000 panels a step)
    // within 1e-4 relative (the midpoint rule's error, (dt^2 / 24) f'' of the curve's fastest
    // rate 1.5/h, is about 3e-5 here).
    let table = measured_curve();
    let infusion = Infusion { start: 1.0 * H, duration: 2.0 * H, particles: 1_000_000_000_003 };
    let s = DoseSchedule { boluses: vec![], infusions: vec![infusion] };
    let mut pool = PlasmaPool::scheduled("p", s.clone(), 2e-6, 1.1e-6, Elimination::Table(table.clone()));
    let dt = 60.0;
    let curve = run(&mut pool, 6.0 * H, dt, 9);
    assert_eq!(pool.dose, infusion.particles, "the infusion's total is exact");
    // The scheme's expectation from the counts each step gave.
    let mut given = vec![];
    let mut t = 0.0;
    while t < 6.0 * H - 1e-9 {
        let n = s.infused_over(t, dt);
        if n > 0 {
            given.push((t + 0.5 * dt, n as f64));
        }
        t += dt;
    }
    let integral = |t: f64| {
        let (a, b) = (infusion.start, t.min(infusion.start + infusion.duration));
        if b <= a {
            return 0.0;
        }
        let m = 4000 * ((b - a) / dt).ceil() as usize;
        let h = (b - a) / m as f64;
        let g = |u: f64| table.fraction(t - u);
        let inner: f64 = (1..m).map(|i| if i % 2 == 1 { 4.0 } else { 2.0 } * g(a + i as f64 * h)).sum();
        infusion.rate() * h / 3.0 * (g(a) + inner + g(b))
    };
    for &(t, amount, _) in &curve {
        let scheme: f64 = given.iter().filter(|g| g.0 < t).map(|&(mid, n)| n * table.fraction(t - mid)).sum();
        assert_close("plasma", t, amount, scheme);
        if t > infusion.start + 600.0 {
            let exact = integral(t);
            assert!((scheme / exact - 1.0).abs() < 1e-4, "at {} h: scheme {scheme} vs integral {exact}", t / H);
        }
    }
}

#[test]
fn an_infusion_follows_the_one_compartment_closed_form_and_gives_its_exact_total() {
    let k = std::f64::consts::LN_2 / (1.5 * H);
    let e = Elimination::Rates { renal: 0.0, phagocytic: k };
    let total = 1_000_000_000_007u64;
    let s = DoseSchedule {
        boluses: vec![],
        infusions: vec![Infusion { start: 1.0 * H, duration: 2.7 * H, particles: total }],
    };
    let mut pool = PlasmaPool::scheduled("p", s.clone(), 2e-6, 1.1e-6, e);
    let curve = run(&mut pool, 9.0 * H, 45.0, 11);
    for &(t, amount, _) in &curve {
        assert_close("plasma", t, amount, one_compartment(&s, k, t));
        if t <= 1.0 * H {
            assert_eq!(amount, 0.0, "nothing before the infusion starts");
        }
    }
    assert_eq!(pool.dose, total, "the infusion's total is exact");
    // Near the plateau of a long infusion the amount approaches R / k.
    let long = DoseSchedule {
        boluses: vec![],
        infusions: vec![Infusion { start: 0.0, duration: 20.0 * H, particles: 20 * 3600 * 1_000_000 }],
    };
    let mut pool =
        PlasmaPool::scheduled("p", long.clone(), 2e-6, 1.1e-6, Elimination::Rates { renal: 0.0, phagocytic: k });
    let curve = run(&mut pool, 20.0 * H, 600.0, 5);
    let plateau = 1e6 / k;
    let last = curve.last().unwrap().1;
    assert!((last / plateau - 1.0).abs() < 1e-3, "{last} vs R/k = {plateau}");
}

#[test]
fn boluses_and_an_infusion_follow_the_two_compartment_superposition() {
    let (a, alpha, beta) = (0.6, std::f64::consts::LN_2 / (0.5 * H), std::f64::consts::LN_2 / (6.0 * H));
    let (k10, k12, k21) = two_compartment(a, alpha, beta);
    let e = Elimination::TwoCompartment { k10, k12, k21 };
    // The transition matrix's central element is the textbook bi-exponential.
    for t in [0.0, 0.3 * H, 2.0 * H, 10.0 * H] {
        let want = a * (-alpha * t).exp() + (1.0 - a) * (-beta * t).exp();
        assert!((transition(k10, k12, k21, t)[0][0] - want).abs() < 1e-12, "{t}");
    }
    let s = DoseSchedule {
        boluses: vec![
            Bolus { time: 0.0, particles: 1_000_000_000_000 },
            Bolus { time: 2.0 * H, particles: 400_000_000_000 },
            Bolus { time: 4.0 * H, particles: 400_000_000_000 },
        ],
        infusions: vec![Infusion { start: 5.0 * H, duration: 3.0 * H, particles: 1_500_000_000_000 }],
    };
    let mut pool = PlasmaPool::scheduled("p", s.clone(), 2e-6, 1.1e-6, e);
    let curve = run(&mut pool, 12.0 * H, 60.0, 7);
    for &(t, amount, _) in &curve {
        assert_close("plasma", t, amount, two_compartment_curve(&s, a, alpha, beta, t));
    }
    assert_eq!(pool.dose, s.total());
    assert!(curve.iter().any(|c| c.2 > 1e11), "the peripheral compartment fills");
}

#[test]
fn the_transition_integral_matches_quadrature() {
    // Composite Simpson over 20000 intervals of the closed-form transition matrix.
    let cases =
        [(1e-4, 3e-4, 2e-4, 60.0), (2e-3, 5e-2, 1e-3, 600.0), (1e-5, 1e-9, 1e-9, 20.0), (1e-3, 0.0, 0.0, 100.0)];
    for (k10, k12, k21, tau) in cases {
        let n = 20_000;
        let h = tau / n as f64;
        let mut want = [[0.0; 2]; 2];
        for i in 0..=n {
            let w = if i == 0 || i == n {
                1.0
            } else if i % 2 == 1 {
                4.0
            } else {
                2.0
            };
            let p = transition(k10, k12, k21, i as f64 * h);
            for r in 0..2 {
                for c in 0..2 {
                    want[r][c] += w * h / 3.0 * p[r][c];
                }
            }
        }
        let got = transition_integral(k10, k12, k21, tau);
        for r in 0..2 {
            for c in 0..2 {
                assert!(
                    (got[r][c] - want[r][c]).abs() <= 1e-9 * tau,
                    "{k10} {k12} {k21} {tau} [{r}][{c}]: {} vs {}",
                    got[r][c],
                    want[r][c]
                );
            }
        }
    }
}

const SCENARIO: &str = r#"
[run]
end_time_h = 6.0
time_step_s = 600.0
snapshot_interval_h = 1.0
[lattice]
shape = [4, 4, 4]
voxel_um = 20.0
[tumour]
radius_um = 5.0
[cells]
host_cell_fraction = 0.0
[vessels.continuum]
host_surface_per_volume_per_cm = 0.0
tumour_surface_per_volume_per_cm = 0.0
[[particle]]
name = "a"
[particle.plasma]
model = "half-life"
half_life_h = 2.0
[[particle.dose]]
kind = "repeated"
at_h = 0.25
every_h = 1.5
count = 3
particles = 2e12
[[particle]]
name = "b"
[particle.plasma]
model = "half-life"
half_life_h = 3.0
distribution_half_life_h = 0.4
distribution_fraction = 0.5
[[particle.dose]]
kind = "bolus"
particles = 1e12
[[particle.dose]]
kind = "infusion"
at_h = 1.1
duration_h = 2.05
particles_per_h = 1e12
"#;

fn load(text: &str) -> Result<LoadedScenario, String> {
    LoadedScenario::from_text(Path::new("dosing.toml"), text.to_string()).map_err(|e| e.to_string())
}

#[test]
fn a_run_lands_its_steps_on_the_dose_times_and_gives_every_dose_exactly() {
    let loaded = load(SCENARIO).unwrap();
    let mut sim = Simulation::new(&loaded).unwrap();
    let breaks = sim.world.resource::<Breakpoints>().times().to_vec();
    for t in [0.25, 1.75, 3.25, 1.1, 3.15] {
        assert!(breaks.iter().any(|&b| (b - t * H).abs() < 1e-6), "{t} h is a breakpoint: {breaks:?}");
    }
    let k_a = std::f64::consts::LN_2 / (2.0 * H);
    let sched_a = sim.params.particles[0].schedule.clone();
    assert_eq!(sched_a.total(), 6_000_000_000_000);
    assert_eq!(sim.params.particles[1].schedule.total(), 3_050_000_000_000);
    let mut ends = Vec::new();
    let mut before = sim.world.resource::<PlasmaPools>().get(1).dose;
    assert_eq!(before, 1_000_000_000_000, "the bolus at 0 of design b is in plasma from the start");
    assert_eq!(sim.world.resource::<PlasmaPools>().get(0).dose, 0);
    while !sim.world.resource::<Clock>().done() {
        sim.step().unwrap();
        let t = sim.world.resource::<Clock>().time;
        ends.push(t);
        let pools = sim.world.resource::<PlasmaPools>();
        let (a, b) = (pools.get(0), pools.get(1));
        assert!(a.balanced() && b.balanced());
        assert_close("plasma of a", t, a.amount as f64, one_compartment(&sched_a, k_a, t));
        assert!(b.dose >= before, "doses only grow");
        before = b.dose;
    }
    for t in [0.25, 1.75, 3.25, 1.1, 3.15] {
        assert!(ends.iter().any(|&e| (e - t * H).abs() < 1e-6), "a step ends at {t} h");
    }
    let pools = sim.world.resource::<PlasmaPools>();
    assert_eq!(pools.get(0).dose, 6_000_000_000_000);
    assert_eq!(pools.get(1).dose, 3_050_000_000_000);
}

#[test]
fn dose_schedules_are_validated_with_the_key_and_what_it_takes() {
    let base = "[run]\nend_time_h = 6.0\n[[particle]]\nname = \"a\"\n";
    let cases: &[(&str, &str, &str)] = &[
        ("dose_particles = 1e12\n[[particle.dose]]\nparticles = 1e12\n", "particle[0].dose_particles", "not both"),
        ("[[particle.dose]]\nkind = \"bolus\"\n", "particle[0].dose[0].particles", "a bolus dose needs it"),
        (
            "[[particle.dose]]\nparticles = 1e12\nevery_h = 2.0\n",
            "particle[0].dose[0].every_h",
            "no every_h in a bolus",
        ),
        (
            "[[particle.dose]]\nkind = \"repeated\"\nparticles = 1e12\ncount = 3\n",
            "particle[0].dose[0].every_h",
            "a repeated dose needs it",
        ),
        (
            "[[particle.dose]]\nkind = \"repeated\"\nparticles = 1e12\nevery_h = 2.0\ncount = 4\n",
            "particle[0].dose[0].count",
            "before run.end_time_h = 6",
        ),
        ("[[particle.dose]]\nat_h = 6.0\nparticles = 1e12\n", "particle[0].dose[0].at_h", "a bolus time before"),
        (
            "[[particle.dose]]\nkind = \"infusion\"\nat_h = 5.0\nduration_h = 2.0\nparticles = 1e12\n",
            "particle[0].dose[0].duration_h",
            "ends by run.end_time_h",
        ),
        (
            "[[particle.dose]]\nkind = \"infusion\"\nduration_h = 2.0\n",
            "particle[0].dose[0].particles",
            "either particles",
        ),
        (
            "[[particle.dose]]\nkind = \"infusion\"\nduration_h = -2.0\nparticles = 1e12\n",
            "particle[0].dose[0].duration_h",
            "(0, 10000]",
        ),
        ("[[particle.dose]]\nparticles = -1.0\n", "particle[0].dose[0].particles", "[0, 1e19]"),
        (
            "[[particle.dose]]\nkind = \"repeated\"\nparticles = 1e19\nevery_h = 1.0\ncount = 3\n",
            "particle[0].dose",
            "exact 64-bit counts",
        ),
    ];
    for (extra, path, expected) in cases {
        let text = format!("{base}{extra}");
        let msg = load(&text).expect_err(&text);
        assert!(msg.contains(path) && msg.contains(expected), "{text}\n---\n{msg}");
        assert!(!msg.contains("panicked"), "{msg}");
    }
    // An unknown key and an unknown kind are named.
    let msg = load(&format!("{base}[[particle.dose]]\nparticles = 1e12\nat_s = 3.0\n")).unwrap_err();
    assert!(msg.contains("at_s") && msg.contains("at_h"), "{msg}");
    let msg = load(&format!("{base}[[particle.dose]]\nkind = \"drip\"\n")).unwrap_err();
    assert!(msg.contains("drip") && msg.contains("infusion"), "{msg}");
    // Without any dose key a design gets the default bolus at t = 0.
    let loaded = load(base).unwrap();
    let p = interstice_sim::params::Params::resolve_loaded(&loaded);
    assert_eq!(p.particles[0].schedule, DoseSchedule::single_bolus(10_000_000_000_000));
}

#[test]
fn a_run_resumed_from_a_checkpoint_inside_a_schedule_continues_bit_for_bit() {
    // Checkpoint at 2 h: design a has had one bolus and has two to come, design b is mid-infusion,
    // design c (a measured curve) has particles of two boluses in plasma and one to come.
    // What a step receives of a schedule is a function of the restored clock, so the resumed run
    // must give the same counts as the uninterrupted one at every step.
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("pk.csv"), "time_h,percent_of_dose\n0.1,90\n1,60\n3,40\n8,20\n").unwrap();
    let text = format!(
        "{SCENARIO}[[particle]]\nname = \"c\"\n[particle.plasma]\nmodel = \"table\"\ntable_csv = \"pk.csv\"\n\
         [[particle.dose]]\nkind = \"repeated\"\nevery_h = 1.2\ncount = 3\nparticles = 1e12\n"
    );
    let loaded = LoadedScenario::from_text(&dir.path().join("dosing.toml"), text).unwrap();
    let fp = interstice_sim::checkpoint::fingerprint(&loaded.text);
    let ckpt = dir.path().join("dosing.ckpt.h5");
    let mut a = Simulation::new(&loaded).unwrap();
    while a.world.resource::<Clock>().time < 2.0 * H - 1e-6 {
        a.step().unwrap();
    }
    interstice_sim::checkpoint::write(&mut a.world, &ckpt, &fp).unwrap();
    let mut b = Simulation::new(&loaded).unwrap();
    interstice_sim::checkpoint::read(&mut b.world, &ckpt, &fp).unwrap();
    let counts = |s: &Simulation| {
        let c = s.world.resource::<Clock>();
        let p = s.world.resource::<PlasmaPools>();
        let pools: Vec<_> = p
            .pools
            .iter()
            .map(|q| (q.dose, q.amount, q.peripheral, q.cleared, q.cleared_renal, format!("{:?}", q.cohorts)))
            .collect();
        (c.time.to_bits(), c.step, pools)
    };
    assert_eq!(counts(&a), counts(&b));
    assert_eq!(a.world.resource::<PlasmaPools>().pools[2].cohorts.len(), 2, "two boluses of c by 2 h");
    while !a.world.resource::<Clock>().done() {
        a.step().unwrap();
        b.step().unwrap();
        assert_eq!(counts(&a), counts(&b));
    }
}
