//! Packet transport against analytic solutions and the well-mixed condition.
//!
//! Tolerances are derived from the sample size (a number of standard errors) or, for the
//! time-discretisation of the scheme, from its stated order; none was tuned to pass.

use std::path::Path;

use interstice_sim::LoadedScenario;
use interstice_sim::Simulation;
use interstice_sim::lattice::Lattice;
use interstice_sim::particles::Packets;
use interstice_sim::process::accounting::Ledger;
use interstice_sim::process::binding::LymphFlow;
use interstice_sim::process::transport::{
    Drift, FaceVelocity, MAX_UNIFORM_RADIUS, MotionFields, TransportParams, move_packets,
};
use interstice_sim::scenario::FaceRule;

fn sim(text: &str) -> Simulation {
    let loaded = LoadedScenario::from_text(Path::new("test.toml"), text.to_string()).expect("valid scenario");
    Simulation::new(&loaded).expect("world builds")
}

/// A world of `n^3` voxels of `h_um` with one inert species and no cells.
fn box_world(n: usize, h_um: f64, faces: &str, max_step: f64) -> Simulation {
    shaped_world([n, n, n], h_um, faces, max_step)
}

/// A world of `shape` voxels of `h_um` with one inert species and no cells.
fn shaped_world(shape: [usize; 3], h_um: f64, faces: &str, max_step: f64) -> Simulation {
    let [nx, ny, nz] = shape;
    let n = nx.min(ny).min(nz);
    sim(&format!(
        r#"
[run]
end_time_h = 100.0
time_step_s = 10.0
snapshot_interval_h = 100.0
[lattice]
shape = [{nx}, {ny}, {nz}]
voxel_um = {h_um}
[tumour]
radius_um = {r}
[cells]
tumour_cell_fraction = 0.0
host_cell_fraction = 0.0
[transport]
faces = "{faces}"
max_step_voxels = {max_step}
[vessels.continuum]
host_surface_per_volume_per_cm = 0.0
tumour_surface_per_volume_per_cm = 0.0
[[particle]]
name = "p"
dose_particles = 0.0
packet_particles = 1.0
"#,
        r = n as f64 * h_um / 4.0
    ))
}

fn seed_point(world: &mut bevy_ecs::world::World, x: [f64; 3], count: usize) {
    let l = world.resource::<Lattice>().clone();
    let mut p = world.resource_mut::<Packets>();
    for _ in 0..count {
        p.push(&l, x, 0, 1);
    }
    world.resource_mut::<Ledger>().injected[0] += count as u64;
}

/// Mean and variance of each coordinate.
fn moments(p: &Packets) -> ([f64; 3], [f64; 3]) {
    let n = p.len() as f64;
    let mut m = [0.0; 3];
    let mut v = [0.0; 3];
    for x in &p.pos {
        for a in 0..3 {
            m[a] += x[a] / n;
        }
    }
    for x in &p.pos {
        for a in 0..3 {
            v[a] += (x[a] - m[a]).powi(2) / (n - 1.0);
        }
    }
    (m, v)
}

#[test]
fn free_diffusion_mean_square_displacement_is_2dt() {
    free_diffusion_msd(false);
}

#[test]
fn free_diffusion_mean_square_displacement_is_2dt_with_single_steps_where_uniform() {
    // The same check where the coefficients are marked uniform: every step is one sub-step of
    // the whole dt (sqrt(6 D dt) = 2.4 of a 10 um voxel here, within the uniform radius).
    free_diffusion_msd(true);
}

fn free_diffusion_msd(mark: bool) {
    // Einstein 1905: each coordinate's variance grows as 2 D t. For Gaussian displacements the
    // sample variance has standard error sqrt(2/(N-1)) sigma^2; we allow 5 of them.
    let mut s = box_world(64, 10.0, "reflect", 1.0);
    let d = 1e-11;
    let l = s.lattice().clone();
    let mut f = MotionFields::uniform(&l, d, 0.3);
    if mark {
        f.mark_uniform(&l, FaceRule::Reflect);
        let widest = f.uniform_radius[0].iter().filter(|&&r| r == MAX_UNIFORM_RADIUS).count();
        assert_eq!(widest, 65 * 65 * 65, "a uniform box with reflecting faces is uniform everywhere (dual grid)");
    }
    s.world.insert_resource(f);
    let n = 20_000;
    seed_point(&mut s.world, l.box_centre(), n);
    let tp = s.world.resource::<TransportParams>().clone();
    let fields = s.world.resource::<MotionFields>().clone();
    let vel = FaceVelocity::zero(&l);
    let steps = 25;
    let dt = 10.0;
    let mut packets = s.world.resource::<Packets>().clone();
    for step in 0..steps {
        move_packets(&l, &fields, &vel, &tp, &mut packets, 7, step, dt, Drift::Ito);
    }
    let t = steps as f64 * dt;
    let (m, v) = moments(&packets);
    let expect = 2.0 * d * t;
    let se = (2.0 / (n as f64 - 1.0)).sqrt() * expect;
    for a in 0..3 {
        assert!((v[a] - expect).abs() < 5.0 * se, "axis {a}: variance {} vs 2Dt {}", v[a], expect);
        let c = l.box_centre()[a];
        assert!((m[a] - c).abs() < 5.0 * (expect / n as f64).sqrt(), "axis {a}: mean drifted");
    }
}

#[test]
fn uniform_flow_carries_the_cloud_at_the_fluid_velocity() {
    // Advection-diffusion with uniform velocity u: mean moves by u t, variance 2 D t per axis
    // (the Galilean shift of the Einstein result).
    let mut s = box_world(64, 10.0, "reflect", 1.0);
    let d = 5e-12;
    let u = [2e-7, -1e-7, 0.0];
    let l = s.lattice().clone();
    let fields = MotionFields::uniform(&l, d, 0.3);
    let vel = FaceVelocity::uniform(&l, u);
    let n = 20_000;
    let start = l.box_centre();
    seed_point(&mut s.world, start, n);
    let tp = s.world.resource::<TransportParams>().clone();
    let mut packets = s.world.resource::<Packets>().clone();
    let (steps, dt) = (40, 10.0);
    for step in 0..steps {
        move_packets(&l, &fields, &vel, &tp, &mut packets, 9, step, dt, Drift::Ito);
    }
    let t = steps as f64 * dt;
    let (m, v) = moments(&packets);
    let var = 2.0 * d * t;
    for a in 0..3 {
        let se_mean = (var / n as f64).sqrt();
        assert!(
            (m[a] - start[a] - u[a] * t).abs() < 5.0 * se_mean,
            "axis {a}: mean {} vs {}",
            m[a] - start[a],
            u[a] * t
        );
        let se_var = (2.0 / (n as f64 - 1.0)).sqrt() * var;
        assert!((v[a] - var).abs() < 5.0 * se_var, "axis {a}: variance {} vs {}", v[a], var);
    }
}

/// Chi-square statistic of packet counts in slabs along x against a density proportional to
/// `weight(slab)`.
fn chi_square_slabs(p: &Packets, l: &Lattice, weight: &dyn Fn(usize) -> f64) -> (f64, usize) {
    let nb = l.n[0];
    let mut counts = vec![0.0; nb];
    for &v in &p.voxel {
        counts[l.ijk(v as usize)[0]] += 1.0;
    }
    let wsum: f64 = (0..nb).map(weight).sum();
    let n = p.len() as f64;
    let chi: f64 = (0..nb)
        .map(|i| {
            let e = n * weight(i) / wsum;
            (counts[i] - e).powi(2) / e
        })
        .sum();
    (chi, nb - 1)
}

/// Upper 0.1 % point of the chi-square distribution with `k` degrees of freedom
/// (Wilson-Hilferty approximation, accurate to a fraction of a percent for k > 10).
fn chi2_999(k: usize) -> f64 {
    let k = k as f64;
    let z = 3.090_232; // standard normal 0.999 quantile
    k * (1.0 - 2.0 / (9.0 * k) + z * (2.0 / (9.0 * k)).sqrt()).powi(3)
}

fn well_mixed_run(d_of_x: &dyn Fn(f64) -> f64, a_of_x: &dyn Fn(f64) -> f64, drift: Drift) -> f64 {
    well_mixed_steps(d_of_x, a_of_x, drift, false, 20)
}

fn well_mixed_steps(
    d_of_x: &dyn Fn(f64) -> f64,
    a_of_x: &dyn Fn(f64) -> f64,
    drift: Drift,
    mark: bool,
    steps: u64,
) -> f64 {
    // A closed box (reflecting faces) filled uniformly in C = n / a.
    let s = box_world(20, 10.0, "reflect", 0.25);
    let l = s.lattice().clone();
    let mut f = MotionFields::uniform(&l, 1.0, 1.0);
    for v in 0..l.len() {
        let x = (l.ijk(v)[0] as f64 + 0.5) / l.n[0] as f64;
        f.a[0][v] = a_of_x(x);
        f.ad[0][v] = a_of_x(x) * d_of_x(x);
    }
    if mark {
        f.mark_uniform(&l, FaceRule::Reflect);
    }
    let tp = s.world.resource::<TransportParams>().clone();
    let mut packets = Packets::default();
    let mut r = interstice_sim::rng::stream(3, interstice_sim::rng::Domain::Tissue, 0, 0);
    let ext = l.extent();
    let amax = (0..1000).map(|i| a_of_x(i as f64 / 1000.0)).fold(0.0, f64::max);
    // Rejection sampling of density proportional to a(x).
    while packets.len() < 40_000 {
        let x = [r.uniform() * ext[0], r.uniform() * ext[1], r.uniform() * ext[2]];
        if r.uniform() * amax <= a_of_x(x[0] / ext[0]) {
            packets.push(&l, x, 0, 1);
        }
    }
    // Long enough for packets to cross several voxels at the largest D (a density error near
    // a jump in D builds up within the diffusion length of each side).
    let dmax = (0..1000).map(|i| d_of_x(i as f64 / 1000.0)).fold(0.0, f64::max);
    let t_total = (8.0 * l.h).powi(2) / (2.0 * dmax);
    let dt = t_total / steps as f64;
    let vel = FaceVelocity::zero(&l);
    for step in 0..steps {
        move_packets(&l, &f, &vel, &tp, &mut packets, 11, step, dt, drift);
    }
    let nx = l.n[0] as f64;
    // Expected share of each slab: the mean of a over it (midpoint rule).
    let slab_mean = |i: usize| (0..64).map(|j| a_of_x((i as f64 + (j as f64 + 0.5) / 64.0) / nx)).sum::<f64>() / 64.0;
    let (chi, k) = chi_square_slabs(&packets, &l, &slab_mean);
    chi / chi2_999(k)
}

#[test]
fn well_mixed_condition_holds_for_smooth_and_discontinuous_d() {
    // Thomson 1987; LaBolle, Fogg and Tompson 1996: a uniform concentration stays uniform.
    // The statistic is scaled by the 0.1 % critical value: below 1 passes the chi-square test.
    let smooth = |x: f64| 1e-11 * (1.0 + 0.9 * (std::f64::consts::TAU * x).sin());
    let jump = |x: f64| if x < 0.5 { 1e-11 } else { 1e-12 };
    let one = |_: f64| 1.0;
    let r1 = well_mixed_run(&smooth, &one, Drift::Ito);
    let r2 = well_mixed_run(&jump, &one, Drift::Ito);
    assert!(r1 < 1.0, "smooth D: chi-square / critical = {r1}");
    assert!(r2 < 1.0, "discontinuous D: chi-square / critical = {r2}");
    // Varying accessible fraction with uniform D: packets stay distributed as a (C uniform).
    let a = |x: f64| 0.2 + 0.3 * x;
    let r3 = well_mixed_run(&|_| 5e-12, &a, Drift::Ito);
    assert!(r3 < 1.0, "varying accessible fraction: {r3}");
}

/// The well-mixed checks with the coefficients marked uniform (a jump in D; an accessible
/// fraction with a ramp between uniform parts), in `steps` steps over the same time.
fn well_mixed_marked(steps: u64, what: &str) {
    let jump = |x: f64| if x < 0.5 { 1e-11 } else { 1e-12 };
    let r = well_mixed_steps(&jump, &|_| 1.0, Drift::Ito, true, steps);
    assert!(r < 1.0, "discontinuous D with {what}: chi-square / critical = {r}");
    let a = |x: f64| 0.2 + 0.3 * ((x - 0.4) / 0.2).clamp(0.0, 1.0);
    let r = well_mixed_steps(&|_| 5e-12, &a, Drift::Ito, true, steps);
    assert!(r < 1.0, "accessible fraction with a ramp between uniform parts, {what}: {r}");
}

#[test]
fn well_mixed_condition_holds_with_single_steps_where_coefficients_are_uniform() {
    // Thomson 1987, as above, with the coefficients marked: away from the jump each step is a
    // single step of uniform increments of up to 0.7 voxel edges; near it the fine sub-steps.
    well_mixed_marked(400, "single steps");
}

#[test]
fn well_mixed_condition_holds_with_long_steps_in_uniform_regions() {
    // Thomson 1987; LaBolle, Fogg and Tompson 1996, as above, with steps whose spread is 2.8
    // voxel edges at the larger D (8 steps over the same time): in the uniform parts Gaussian
    // constant-coefficient sub-steps as long as the uniform radius allows (moves up to 7 voxel
    // edges here), near the jump and its ramp the fine sub-steps of a quarter voxel. (With
    // bounded uniform increments in those long sub-steps this statistic came out at 1.6 during
    // development: their excess kurtosis, changing with the sub-step length, biases the density.)
    well_mixed_marked(8, "long steps");
}

/// An accessible fraction that jumps from 0.2 to 0.5 halfway along the well-mixed box, as the
/// motion sees it: interpolated linearly between the centres of the box's 20 voxels and constant
/// beyond the outer centres (the transport module's trilinear interpolation, along x). At the
/// voxel centres, where the box samples its fields, it is the jump itself.
fn jumping_fraction(x: f64) -> f64 {
    let at = |i: usize| if i < 10 { 0.2 } else { 0.5 };
    let u = (x * 20.0 - 0.5).clamp(0.0, 19.0);
    let i = (u.floor() as usize).min(18);
    at(i) + (at(i + 1) - at(i)) * (u - i as f64)
}

#[test]
fn well_mixed_condition_holds_for_a_jump_in_the_accessible_fraction() {
    // Thomson 1987; LaBolle, Fogg and Tompson 1996, as above, with the accessible fraction
    // jumping between two voxels, alone and together with a jump in D, in fine sub-steps
    // everywhere (20 steps), with single steps where uniform (400 steps) and with long steps (8).
    // The packets' well-mixed density is proportional to a as the motion interpolates it, so the
    // fill and the expected slab counts use that ramp: against the voxels' own values, a step,
    // the statistic came out at 1.2-2.2 (an earlier stop took that for a bias of the scheme).
    let jump_d = |x: f64| if x < 0.5 { 1e-11 } else { 1e-12 };
    let even_d = |_: f64| 5e-12;
    // (jump in D too, marked uniform, steps)
    let cases = [(false, false, 20), (false, true, 400), (false, true, 8), (true, false, 20), (true, true, 8)];
    for (both, mark, steps) in cases {
        let d: &dyn Fn(f64) -> f64 = if both { &jump_d } else { &even_d };
        let r = well_mixed_steps(d, &jumping_fraction, Drift::Ito, mark, steps);
        let what = if both { "a and D" } else { "a" };
        assert!(r < 1.0, "jump in {what}, marked {mark}, {steps} steps: chi-square / critical = {r}");
    }
}

#[test]
fn without_the_ito_drift_the_well_mixed_condition_fails() {
    // The same scheme without grad(aD)/a: walkers pile up where D is small. This is the error
    // the drift term exists to prevent; the test expects the chi-square test to reject clearly.
    let jump = |x: f64| if x < 0.5 { 1e-11 } else { 1e-12 };
    let r = well_mixed_run(&jump, &|_| 1.0, Drift::Omitted);
    assert!(r > 10.0, "without drift the density should be far from uniform: {r}");
}

/// Runs a quasi one-dimensional column with a reservoir of constant concentration in its first
/// `res` voxels along x; returns the mean packets per voxel in each x column, averaged over
/// the last `avg` steps.
#[allow(clippy::too_many_arguments)]
fn column_with_reservoir(
    nx: usize,
    res: usize,
    per_voxel: usize,
    d: f64,
    sink: f64,
    steps: u64,
    dt: f64,
    avg: u64,
) -> (Vec<f64>, f64) {
    let mut s = sim(&format!(
        r#"
[run]
end_time_h = 100.0
time_step_s = {dt}
snapshot_interval_h = 100.0
[lattice]
shape = [{nx}, 4, 4]
voxel_um = 10.0
[tumour]
radius_um = 15.0
[cells]
tumour_cell_fraction = 0.0
host_cell_fraction = 0.0
[transport]
max_step_voxels = 0.5
[vessels.continuum]
host_surface_per_volume_per_cm = 0.0
tumour_surface_per_volume_per_cm = 0.0
[[particle]]
name = "p"
dose_particles = 0.0
packet_particles = 1.0
"#
    ));
    let l = s.lattice().clone();
    let a = 0.25;
    s.world.insert_resource(MotionFields::uniform(&l, d, a));
    // First-order sink k through the drainage channel: rate Q / V_acc = k.
    let q: Vec<f64> =
        (0..l.len()).map(|v| if l.ijk(v)[0] >= res { sink * a * l.voxel_volume() } else { 0.0 }).collect();
    s.world.insert_resource(LymphFlow(q));
    let mut acc = vec![0.0; nx];
    let cross = (l.n[1] * l.n[2]) as f64;
    for step in 0..steps {
        // Refill the reservoir to exactly `per_voxel` packets per voxel at uniform positions.
        {
            let mut r = interstice_sim::rng::stream(5, interstice_sim::rng::Domain::Tissue, 1, step);
            let mut p = s.world.resource_mut::<Packets>();
            let mut removed = 0u64;
            for i in 0..p.len() {
                if l.ijk(p.voxel[i] as usize)[0] < res {
                    removed += p.weight[i];
                    p.weight[i] = 0;
                }
            }
            p.compact();
            let mut added = 0u64;
            for v in 0..l.len() {
                let ijk = l.ijk(v);
                if ijk[0] < res {
                    for _ in 0..per_voxel {
                        let c = l.centre(ijk);
                        let x = [
                            c[0] + (r.uniform() - 0.5) * l.h,
                            c[1] + (r.uniform() - 0.5) * l.h,
                            c[2] + (r.uniform() - 0.5) * l.h,
                        ];
                        p.push(&l, x, 0, 1);
                        added += 1;
                    }
                }
            }
            let mut ledger = s.world.resource_mut::<Ledger>();
            ledger.injected[0] = ledger.injected[0] + added - removed;
        }
        s.step().expect("step");
        if step >= steps - avg {
            let p = s.world.resource::<Packets>();
            for &v in &p.voxel {
                acc[l.ijk(v as usize)[0]] += 1.0 / (avg as f64 * cross);
            }
        }
    }
    (acc, l.h)
}

/// erfc by the Abramowitz and Stegun 7.1.26 rational approximation (|error| < 1.5e-7).
fn erfc(x: f64) -> f64 {
    let t = 1.0 / (1.0 + 0.327_591_1 * x.abs());
    let y = t
        * (0.254_829_592 + t * (-0.284_496_736 + t * (1.421_413_741 + t * (-1.453_152_027 + t * 1.061_405_429))))
        * (-x * x).exp();
    if x >= 0.0 { y } else { 2.0 - y }
}

#[test]
fn constant_face_concentration_gives_the_erfc_profile() {
    // Crank, The Mathematics of Diffusion (2nd ed., 1975), section 2.3 and eq. 2.14: a medium
    // whose half x < 0 starts at uniform C0 has C(x, t) = C0/2 erfc(x / (2 sqrt(D t))); the
    // concentration at x = 0 stays C0/2, so the half x > 0 is exactly the semi-infinite medium
    // with a constant-concentration face. Reflecting walls lie beyond 5 sqrt(D t) on both sides.
    // Counting noise per column is Poisson: sd = sqrt(expected count).
    let s = shaped_world([40, 4, 4], 10.0, "reflect", 0.5);
    let l = s.lattice().clone();
    let d = 2e-12;
    let fields = MotionFields::uniform(&l, d, 0.5);
    let per_voxel = 40usize;
    let half = l.n[0] / 2;
    let mut packets = Packets::default();
    let mut r = interstice_sim::rng::stream(5, interstice_sim::rng::Domain::Tissue, 1, 0);
    for v in 0..l.len() {
        let ijk = l.ijk(v);
        if ijk[0] < half {
            let c = l.centre(ijk);
            for _ in 0..per_voxel {
                let x = [
                    c[0] + (r.uniform() - 0.5) * l.h,
                    c[1] + (r.uniform() - 0.5) * l.h,
                    c[2] + (r.uniform() - 0.5) * l.h,
                ];
                packets.push(&l, x, 0, 1);
            }
        }
    }
    let tp = s.world.resource::<TransportParams>().clone();
    let vel = FaceVelocity::zero(&l);
    let (steps, dt) = (60u64, 10.0);
    for step in 0..steps {
        move_packets(&l, &fields, &vel, &tp, &mut packets, 13, step, dt, Drift::Ito);
    }
    let t = steps as f64 * dt;
    assert!(5.0 * (d * t).sqrt() < half as f64 * l.h, "walls too close");
    let cross = (l.n[1] * l.n[2]) as f64;
    let mut counts = vec![0.0; l.n[0]];
    for &v in &packets.voxel {
        counts[l.ijk(v as usize)[0]] += 1.0;
    }
    let x0 = l.origin[0] + half as f64 * l.h;
    for (i, &c) in counts.iter().enumerate() {
        // Average of the profile over the column's width (Simpson's rule on the erfc).
        let (a, b) = (l.origin[0] + i as f64 * l.h - x0, l.origin[0] + (i + 1) as f64 * l.h - x0);
        let f = |x: f64| 0.5 * erfc(x / (2.0 * (d * t).sqrt()));
        let mean = (f(a) + 4.0 * f(0.5 * (a + b)) + f(b)) / 6.0;
        let expect = mean * per_voxel as f64 * cross;
        let sd = expect.sqrt().max(1.0);
        assert!((c - expect).abs() < 5.0 * sd, "column {i}: {c} packets vs {expect:.1} expected");
    }
}

#[test]
fn first_order_uptake_gives_the_exponential_steady_profile() {
    // Crank (1975), steady diffusion with a first-order sink from a face held at C0:
    // C/C0 = exp(-x sqrt(k / D)). Averaged over the last steps to reduce counting noise.
    let (d, k) = (2e-12, 2e-3); // penetration length sqrt(D/k) = 31.6 um = 3.2 voxels
    let per_voxel = 60;
    let dt = 2.0;
    let (prof, h) = column_with_reservoir(30, 4, per_voxel, d, k, 1500, dt, 200);
    let c0 = per_voxel as f64;
    let lpen = (d / k).sqrt();
    let mut checked = 0;
    for (i, &c) in prof.iter().enumerate().skip(4) {
        let x = (i as f64 - 4.0 + 0.5) * h;
        let expect = c0 * (-x / lpen).exp();
        if expect < 2.0 {
            break;
        }
        // Counts averaged over 200 steps of 16 voxels; the profile relaxes over L^2/D = 500 s,
        // longer than the 400 s averaged, so count the average as one sample: sd = sqrt(n/16).
        let sd = (expect / 16.0).sqrt();
        // The reservoir is refilled once per step: in between, the face loses the flux
        // C0 sqrt(k D) dt per area, a relative dip of sqrt(k D) dt / h of the first voxel,
        // which lowers the effective face concentration by at most that fraction.
        let refill = c0 * (k * d).sqrt() * dt / h;
        assert!((c - expect).abs() < 5.0 * sd + refill * (-x / lpen).exp(), "x = {x:e}: {c} vs {expect}");
        checked += 1;
    }
    assert!(checked >= 3, "profile too short to test");
}
