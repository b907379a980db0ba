//! Scheduled interventions: each changes what it acts on in the expected direction and by the
//! amount its kinetics imply, and a scheduled parameter change equals a restart with the new value.

use std::path::Path;

use bevy_ecs::change_detection::DetectChangesMut;
use interstice_sim::particles::Packets;
use interstice_sim::process::accounting::Ledger;
use interstice_sim::process::exchange::{WallExchange, patlak};
use interstice_sim::process::interventions::Interventions;
use interstice_sim::process::oxygen::{self, Oxygen};
use interstice_sim::process::plasma::PlasmaPools;
use interstice_sim::process::pressure::InterstitialFluid;
use interstice_sim::process::transport::MotionFields;
use interstice_sim::tissue::{CellLoad, Matrix, Occupancy, Regions, TUMOUR};
use interstice_sim::vascular::{ContinuumPores, WallFluid};
use interstice_sim::vessels::flow::BloodFlow;
use interstice_sim::vessels::network::Network;
use interstice_sim::vessels::pore::{BODY_TEMPERATURE, stokes_einstein, wall_coefficients};
use interstice_sim::world::Clock;
use interstice_sim::{LoadedScenario, Simulation};

fn sim(text: &str) -> Simulation {
    let loaded = LoadedScenario::from_text(Path::new("iv.toml"), text.to_string()).unwrap();
    Simulation::new(&loaded).unwrap()
}

/// Steps until the clock reads `t` (s); steps end exactly on update times.
fn run_to(s: &mut Simulation, t: f64) {
    while s.world.resource::<Clock>().time < t * (1.0 - 1e-12) {
        s.step().unwrap();
    }
}

const TISSUE: &str = r#"
[run]
end_time_h = 6.0
time_step_s = 60.0
snapshot_interval_h = 1.0
[lattice]
shape = [16, 16, 16]
voxel_um = 25.0
[tumour]
radius_um = 150.0
[matrix]
tumour_collagen_fraction = 0.06
[[particle]]
name = "np"
hydrodynamic_radius_nm = 20.0
packet_particles = 1e9
"#;

#[test]
fn matrix_degradation_follows_the_closed_form_decay_and_lowers_hindrance_and_pressure() {
    // phi(t) = phi0 exp(-k tau (1 - exp(-(t - t0)/tau))), tau = t_half / ln 2: first-order
    // degradation by an enzyme with first-order loss of activity (Michaelis and Menten 1913, far
    // below saturation), integrated by hand.
    let text = format!(
        "{TISSUE}\n[[intervention]]\nname = \"enzyme\"\nstart_h = 1.0\nduration_h = 3.0\n\
         [intervention.matrix_degradation]\nrate_per_h = 0.8\nenzyme_half_life_h = 2.0\nupdate_interval_min = 30.0\n"
    );
    let mut s = sim(&text);
    let regions = s.world.resource::<Regions>().region.data.clone();
    let v_t = regions.iter().position(|&r| r == TUMOUR).unwrap();
    let v_h = regions.iter().position(|&r| r != TUMOUR).unwrap();
    let phi0 = s.world.resource::<Matrix>().collagen.data[v_t];
    let host0 = s.world.resource::<Matrix>().collagen.data[v_h];
    let ad0 = s.world.resource::<MotionFields>().ad[0][v_t];
    let p0 = s.world.resource::<InterstitialFluid>().pressure.data[v_t];
    let (k, tau) = (0.8 / 3600.0, 2.0 * 3600.0 / std::f64::consts::LN_2);
    let expected = |t: f64| phi0 * (-k * tau * (1.0 - (-(t.min(4.0 * 3600.0) - 3600.0) / tau).exp())).exp();
    for t_h in [1.0, 1.5, 2.5, 4.0, 5.5] {
        let t = t_h * 3600.0;
        run_to(&mut s, t);
        let phi = s.world.resource::<Matrix>().collagen.data[v_t];
        assert!((phi / expected(t) - 1.0).abs() < 1e-12, "t = {t_h} h: {phi} vs {}", expected(t));
        assert_eq!(s.world.resource::<Matrix>().collagen.data[v_h], host0, "host matrix untouched");
    }
    // The treatment removed 1 - exp(-k tau (1 - e^(-3h/tau))) of the fibres: about 70 %.
    let left = s.world.resource::<Matrix>().collagen.data[v_t] / phi0;
    assert!((left - (-k * tau * (1.0 - (-3.0 * 3600.0 / tau).exp())).exp()).abs() < 1e-12);
    // Looser matrix: hindered diffusion up; hydraulic conductivity up, so the tumour pressure
    // falls toward the host's (Baxter and Jain 1989: a lower alpha flattens less).
    assert!(s.world.resource::<MotionFields>().ad[0][v_t] > ad0 * 1.05);
    let p1 = s.world.resource::<InterstitialFluid>().pressure.data[v_t];
    assert!(s.world.resource::<InterstitialFluid>().solves > 1, "pressure re-solved");
    assert!(p1 != p0);
}

const NETWORK: &str = r#"
[run]
end_time_h = 8.0
time_step_s = 120.0
snapshot_interval_h = 1.0
[lattice]
shape = [24, 24, 24]
voxel_um = 20.0
[tumour]
radius_um = 170.0
[vessels]
model = "network"
[vessels.network]
tumour_pore_median_nm = 300.0
[[particle]]
name = "np"
hydrodynamic_radius_nm = 5.0
packet_particles = 1e9
"#;

fn tumour_segments(s: &Simulation) -> Vec<usize> {
    let ivs = s.world.resource::<Interventions>();
    (0..ivs.segments[0].len()).filter(|&i| ivs.segments[0][i]).collect()
}

#[test]
fn normalisation_shrinks_pores_as_its_kinetics_imply_and_lowers_tumour_pressure() {
    let text = format!(
        "{NETWORK}\n[[intervention]]\nname = \"norm\"\nstart_h = 1.0\n[intervention.normalisation]\n\
         normal_pore_radius_nm = 20.0\ntime_constant_h = 2.0\nupdate_interval_min = 30.0\nprune_maturity_below = 0.2\n"
    );
    let mut s = sim(&text);
    let segs = tumour_segments(&s);
    assert!(!segs.is_empty());
    let net0 = s.world.resource::<Network>().clone();
    run_to(&mut s, 3600.0);
    let p_before = tumour_pressure(&s);
    run_to(&mut s, 5.0 * 3600.0);
    // r(t) = r_n + (r_0 - r_n) exp(-(t - t0)/tau) for pores above r_n; the last update was at 5 h.
    let f = (-4.0f64 / 2.0).exp();
    let net = s.world.resource::<Network>();
    let mut pruned = 0;
    for &i in &segs {
        let (r0, r) = (net0.segments[i].pore_radius, net.segments[i].pore_radius);
        let want = if r0 > 20e-9 { 20e-9 + (r0 - 20e-9) * f } else { r0 };
        assert!((r / want - 1.0).abs() < 1e-12, "segment {i}: {r} vs {want}");
        if net0.segments[i].maturity < 0.2 {
            pruned += 1;
            assert!(!s.world.resource::<BloodFlow>().perfused[i], "a pruned vessel carries no flow");
        }
    }
    assert!(pruned > 0, "some immature vessels were pruned");
    // Tighter walls leak less fluid: the high tumour pressure falls (Jain 2005, common practice).
    run_to(&mut s, 5.0 * 3600.0 + 240.0);
    let p_after = tumour_pressure(&s);
    assert!(p_after < 0.9 * p_before, "tumour pressure {p_before} -> {p_after} Pa");
}

#[test]
fn heating_widens_pores_and_raises_flow_then_both_return() {
    let text = format!(
        "{NETWORK}\n[[intervention]]\nname = \"heat\"\nregion = \"all\"\nstart_h = 1.0\nduration_h = 1.0\n\
         [intervention.heating]\npore_factor = 1.5\nflow_factor = 2.0\nrelax_time_h = 0.5\nupdate_interval_min = 10.0\n"
    );
    let mut s = sim(&text);
    let net0 = s.world.resource::<Network>().clone();
    let q0 = s.world.resource::<BloodFlow>().total_inflow;
    run_to(&mut s, 1.5 * 3600.0);
    s.step().unwrap(); // the blood process re-solves at the start of a step
    let net = s.world.resource::<Network>();
    for (a, b) in net0.segments.iter().zip(&net.segments) {
        assert!((b.pore_radius / a.pore_radius - 1.5).abs() < 1e-12);
    }
    let q1 = s.world.resource::<BloodFlow>().total_inflow;
    // Radii times 2^(1/4): Poiseuille conductance doubles; the in vivo viscosity law (Pries et al.
    // 1994) lowers the apparent viscosity of wider vessels, so the rise is at least about twofold.
    assert!(q1 / q0 > 1.8 && q1 / q0 < 2.6, "inflow {q0} -> {q1}");
    // Seven relaxation times after the heating ends the vessels are back to within 1e-3.
    run_to(&mut s, 2.0 * 3600.0 + 7.0 * 1800.0);
    s.step().unwrap();
    let net = s.world.resource::<Network>();
    for (a, b) in net0.segments.iter().zip(&net.segments) {
        assert!((b.pore_radius / a.pore_radius - 1.0).abs() < 1e-3);
    }
    assert!((s.world.resource::<BloodFlow>().total_inflow / q0 - 1.0).abs() < 5e-3);
}

/// Mean interstitial pressure over the tumour's voxels, Pa.
fn tumour_pressure(s: &Simulation) -> f64 {
    let regions = &s.world.resource::<Regions>().region.data;
    let p = &s.world.resource::<InterstitialFluid>().pressure.data;
    let (sum, n) = regions.iter().zip(p).filter(|(r, _)| **r == TUMOUR).fold((0.0, 0), |a, (_, p)| (a.0 + p, a.1 + 1));
    sum / n as f64
}

#[test]
fn normalisation_of_continuum_vessels_shrinks_pores_and_conductivity_and_lowers_tumour_pressure() {
    // Continuum vessels (one uniform wall per region): the tumour's 200 nm pores relax as
    // r(t) = r_n + (r_0 - r_n) exp(-(t - t0)/tau), voxel by voxel in the region; at the walls'
    // pore area fraction Lp = gamma r^2 / (8 mu L) (pore theory) falls as (r / r_0)^2, and the
    // particles' wall permeability and reflection follow the pores (the pore theory of
    // vessels::pore, tested against its references there).
    let text = format!(
        "{TISSUE}\n[[intervention]]\nname = \"norm\"\nstart_h = 1.0\n[intervention.normalisation]\n\
         normal_pore_radius_nm = 20.0\ntime_constant_h = 2.0\nupdate_interval_min = 30.0\n"
    );
    let mut s = sim(&text);
    let regions = s.world.resource::<Regions>().region.data.clone();
    let v_t = regions.iter().position(|&r| r == TUMOUR).unwrap();
    let v_h = regions.iter().position(|&r| r != TUMOUR).unwrap();
    let wall0 = s.world.resource::<WallFluid>().clone();
    let patch = |s: &Simulation, v: usize| {
        s.world.resource::<WallExchange>().patches.iter().find(|p| p.voxel as usize == v).expect("a wall patch").clone()
    };
    let (t0, h0) = (patch(&s, v_t), patch(&s, v_h));
    run_to(&mut s, 3600.0);
    let p_before = tumour_pressure(&s);
    run_to(&mut s, 5.0 * 3600.0);
    s.step().unwrap(); // the exchange re-derives its patches at the start of a step
    let c = s.params.continuum_vessels.clone();
    let r0 = c.pore_radius[1];
    assert!((r0 - 200e-9).abs() < 1e-15, "the tumour pore radius the scenario gives");
    let r = 20e-9 + (r0 - 20e-9) * (-4.0f64 / 2.0).exp();
    let f = s.world.resource::<ContinuumPores>().factor.clone();
    assert!((f[v_t] - r / r0).abs() < 1e-12, "pore factor {} vs {}", f[v_t], r / r0);
    assert_eq!(f[v_h], 1.0, "host walls untouched (the intervention's region is the tumour)");
    let wall = s.world.resource::<WallFluid>();
    let lp_ratio = wall.lp_s.data[v_t] / wall0.lp_s.data[v_t];
    assert!((lp_ratio - (r / r0).powi(2)).abs() < 1e-12, "Lp S ratio {lp_ratio}");
    assert_eq!(wall.lp_s.data[v_h], wall0.lp_s.data[v_h]);
    // The particles' wall coefficients at the new pore radius, same pore area fraction.
    let p = &s.params;
    let mu = p.blood.plasma_viscosity;
    let gamma = 8.0 * mu * c.wall_thickness * c.wall_conductivity[1] / (r0 * r0);
    let radius = p.designs.0[0].radius;
    let d0 = stokes_einstein(radius, mu, BODY_TEMPERATURE);
    let w = wall_coefficients(r, gamma, c.wall_thickness, radius, d0, mu, p.network.hindrance);
    let area = c.surface_per_volume[1] * s.lattice().voxel_volume();
    let (t1, h1) = (patch(&s, v_t), patch(&s, v_h));
    assert!((t1.ps[0] / (w.permeability * area) - 1.0).abs() < 1e-12, "PS {} vs {}", t1.ps[0], w.permeability * area);
    assert!((t1.pass[0] - (1.0 - w.reflection)).abs() < 1e-12);
    assert!(t1.ps[0] < t0.ps[0] && (t1.lp_s / t0.lp_s - lp_ratio).abs() < 1e-12);
    assert_eq!((h1.ps[0], h1.lp_s), (h0.ps[0], h0.lp_s));
    // Tighter walls leak less fluid: the high tumour pressure falls (Jain 2005, common practice).
    let p_after = tumour_pressure(&s);
    assert!(p_after < 0.9 * p_before, "tumour pressure {p_before} -> {p_after} Pa");
}

#[test]
fn heating_widens_the_pores_of_continuum_vessels_then_they_return() {
    let text = format!(
        "{TISSUE}\n[[intervention]]\nname = \"heat\"\nregion = \"all\"\nstart_h = 1.0\nduration_h = 1.0\n\
         [intervention.heating]\npore_factor = 1.5\nrelax_time_h = 0.5\nupdate_interval_min = 10.0\n"
    );
    let mut s = sim(&text);
    let wall0 = s.world.resource::<WallFluid>().clone();
    run_to(&mut s, 1.5 * 3600.0);
    let f = &s.world.resource::<ContinuumPores>().factor;
    assert!(f.iter().all(|&x| (x - 1.5).abs() < 1e-12), "pores times 1.5 everywhere at full heat");
    let wall = s.world.resource::<WallFluid>();
    for (a, b) in wall0.lp_s.data.iter().zip(&wall.lp_s.data) {
        assert!((b - 2.25 * a).abs() <= 1e-12 * a, "Lp S times 1.5^2");
    }
    // Seven relaxation times after the heating ends the walls are back to within 1e-3.
    run_to(&mut s, 2.0 * 3600.0 + 7.0 * 1800.0);
    let f = &s.world.resource::<ContinuumPores>().factor;
    assert!(f.iter().all(|&x| (x - 1.0).abs() < 1e-3));
}

#[test]
fn a_continuum_run_resumed_mid_normalisation_continues_exactly() {
    // As the network restart test below: the pore factors in force are recomputed from the start
    // values at the restored time, so the resumed run equals the uninterrupted one.
    let text = format!(
        "{}\n[[intervention]]\nname = \"norm\"\nstart_h = 0.5\n[intervention.normalisation]\n\
         time_constant_h = 1.0\nupdate_interval_min = 20.0\n",
        TISSUE
            .replace("end_time_h = 6.0", "end_time_h = 2.0")
            .replace("packet_particles = 1e9", "packet_particles = 1e4")
    );
    let mut a = sim(&text);
    run_to(&mut a, 7200.0);
    let (_, mut b) = restarted(&text, &text, 3600.0, 7200.0);
    assert!(!state(&mut a).0.is_empty());
    assert_eq!(state(&mut a), state(&mut b));
    assert_eq!(a.world.resource::<ContinuumPores>().factor, b.world.resource::<ContinuumPores>().factor);
    assert_eq!(
        a.world.resource::<InterstitialFluid>().pressure.data,
        b.world.resource::<InterstitialFluid>().pressure.data
    );
}

#[test]
fn a_penetrating_peptide_multiplies_wall_and_tissue_transport_while_it_acts() {
    let text = format!(
        "{NETWORK}\n[[intervention]]\nname = \"pep\"\nstart_h = 1.0\nduration_h = 1.0\n\
         [intervention.peptide]\nparticle = \"np\"\nwall_factor = 4.0\ntissue_factor = 2.0\n"
    );
    let mut s = sim(&text);
    s.step().unwrap();
    let influx0: f64 = s.world.resource::<WallExchange>().influx[0].iter().sum();
    let ad0 = s.world.resource::<MotionFields>().ad[0].clone();
    run_to(&mut s, 3600.0);
    s.step().unwrap();
    let influx1: f64 = s.world.resource::<WallExchange>().influx[0].iter().sum();
    // The Patlak influx (Patlak, Goldstein and Hoffman 1963) of every wall patch with four times
    // its permeability-surface product: more particles enter, by what the expression implies.
    assert_eq!(s.world.resource::<WallExchange>().route_factor, vec![4.0]);
    let p = s.world.resource::<InterstitialFluid>().pressure.data.clone();
    let want: f64 = s
        .world
        .resource::<WallExchange>()
        .patches
        .iter()
        .map(|q| patlak((q.drive - q.lp_s * p[q.voxel as usize]) * q.pass[0], 4.0 * q.ps[0]).0)
        .sum();
    assert!((influx1 / want - 1.0).abs() < 1e-9, "{influx1} vs {want}");
    assert!(influx1 > influx0, "{influx0} -> {influx1}");
    let ad1 = &s.world.resource::<MotionFields>().ad[0];
    let doubled = ad0.iter().zip(ad1).filter(|(a, b)| (*b / *a - 2.0).abs() < 1e-12).count();
    assert!(doubled > 0, "diffusion doubled where cells carry receptors");
    run_to(&mut s, 2.0 * 3600.0);
    s.step().unwrap();
    assert_eq!(&s.world.resource::<MotionFields>().ad[0], &ad0, "back once it stops");
}

/// State that any later output is a function of: packets, ledger, plasma, cell loads.
fn state(s: &mut Simulation) -> (Vec<u64>, Vec<u32>, String, String, Vec<[u64; 8]>) {
    interstice_sim::process::binding::hand_over_gains(&mut s.world);
    let p = s.world.resource::<Packets>();
    let ids = p.id.clone();
    let vox = p.voxel.clone();
    let ledger = format!("{:?}", s.world.resource::<Ledger>());
    let pools = format!(
        "{:?}",
        s.world.resource::<PlasmaPools>().pools.iter().map(|p| (p.amount, p.cleared)).collect::<Vec<_>>()
    );
    let mut q = s.world.query::<&CellLoad>();
    let loads = q.iter(&s.world).map(|c| c.bound).collect();
    (ids, vox, ledger, pools, loads)
}

/// A small tumour with network vessels and one targeted design, for the restart checks.
const SMALL_NETWORK: &str = r#"
[run]
end_time_h = 2.0
time_step_s = 30.0
snapshot_interval_h = 0.5
[lattice]
shape = [16, 16, 16]
voxel_um = 20.0
[tumour]
radius_um = 120.0
[vessels]
model = "network"
[[particle]]
name = "np"
packet_particles = 1e6
[particle.ligand]
valency = 2
koff_per_s = 1e-4
internalisation_per_s = 1e-4
"#;

/// Runs `before` to `t_checkpoint` (s) and writes a checkpoint; builds a world from `after`,
/// restores the checkpoint into it and runs it to `t_end`. Returns both worlds.
fn restarted(before: &str, after: &str, t_checkpoint: f64, t_end: f64) -> (Simulation, Simulation) {
    let dir = tempfile::tempdir().unwrap();
    let ck = dir.path().join("r.ckpt.h5");
    let mut old = sim(before);
    run_to(&mut old, t_checkpoint);
    interstice_sim::checkpoint::write(&mut old.world, &ck, "same").unwrap();
    let mut new = sim(after);
    interstice_sim::checkpoint::read(&mut new.world, &ck, "same").unwrap();
    run_to(&mut new, t_end);
    (old, new)
}

#[test]
fn a_scheduled_change_equals_a_restart_with_the_new_value() {
    // Run A changes koff and the internalisation rate at 1 h; run B runs the old scenario to 1 h,
    // writes a checkpoint, and continues from it with a scenario that has the new values from the
    // start. Their states agree exactly at the end.
    let base = SMALL_NETWORK;
    let with_set = format!(
        "{base}\n[[intervention]]\nname = \"a\"\nstart_h = 1.0\n[intervention.set]\nkey = \"particle[0].ligand.koff_per_s\"\nvalue = 1e-2\n\
         [[intervention]]\nname = \"b\"\nstart_h = 1.0\n[intervention.set]\nkey = \"particle[0].ligand.internalisation_per_s\"\nvalue = 5e-3\n"
    );
    let changed = base
        .replace("koff_per_s = 1e-4", "koff_per_s = 1e-2")
        .replace("internalisation_per_s = 1e-4", "internalisation_per_s = 5e-3");
    let mut a = sim(&with_set);
    run_to(&mut a, 7200.0);
    let (mut b_old, mut b) = restarted(base, &changed, 3600.0, 7200.0);
    let (sa, sb) = (state(&mut a), state(&mut b));
    assert!(!sa.0.is_empty(), "particles reached the tissue");
    assert_eq!(sa, sb);
    // And the change had an effect: the old scenario run on differs.
    run_to(&mut b_old, 7200.0);
    assert_ne!(state(&mut b_old).2, sa.2);
}

#[test]
fn bad_interventions_get_clear_messages() {
    let cases: &[(&str, &str)] = &[
        ("[intervention.set]\nkey = \"lattice.voxel_um\"\nvalue = 10.0\n", "may change during a run"),
        ("[intervention.set]\nkey = \"binding.no_such_key\"\nvalue = 1.0\n", "does not name a key"),
        ("[intervention.set]\nkey = \"particle[0].ligand.koff_per_s\"\nvalue = -1.0\n", "koff_per_s"),
        ("[intervention.set]\nkey = \"particle[3].coating\"\nvalue = \"none\"\n", "no entry 3"),
        ("[intervention.peptide]\nparticle = \"nope\"\n", "the name of a particle design"),
        ("[intervention.normalisation]\n[intervention.heating]\n", "exactly one of the tables"),
        ("[intervention.normalisation]\nprune_maturity_below = 0.3\n", "no maturity to prune by"),
        ("[intervention.matrix_degradation]\nrate_per_h = -1.0\n", "rate_per_h"),
    ];
    for (table, want) in cases {
        let text = format!("{TISSUE}\n[particle.ligand]\n[[intervention]]\nstart_h = 1.0\n{table}");
        let err = LoadedScenario::from_text(Path::new("bad.toml"), text).unwrap_err().to_string();
        assert!(err.contains(want) && err.contains("bad.toml") && err.contains("intervention[0]"), "{table}: {err}");
    }
}

/// The small network with three interventions: matrix degradation from 0.25 h, normalisation
/// (which closes immature vessels) from 0.5 h and a peptide from 0.75 to 1.5 h.
fn treated_network() -> String {
    format!(
        "{}{}",
        SMALL_NETWORK.replace("time_step_s = 30.0", "time_step_s = 60.0"),
        r#"
[[intervention]]
name = "enzyme"
start_h = 0.25
[intervention.matrix_degradation]
rate_per_h = 1.0
update_interval_min = 10.0
[[intervention]]
name = "norm"
start_h = 0.5
[intervention.normalisation]
time_constant_h = 1.0
update_interval_min = 20.0
prune_maturity_below = 0.3
[[intervention]]
name = "pep"
start_h = 0.75
duration_h = 0.75
[intervention.peptide]
particle = "np"
"#
    )
}

#[test]
fn a_run_with_interventions_resumed_from_a_checkpoint_continues_exactly() {
    // Every effect is recomputed from the values at the start of the run at its last update time,
    // so a world rebuilt from the scenario and restored from a checkpoint taken mid-treatment
    // continues exactly as the uninterrupted run.
    let text = treated_network();
    let mut a = sim(&text);
    run_to(&mut a, 7200.0);
    let (_, mut b) = restarted(&text, &text, 3600.0, 7200.0);
    assert!(!state(&mut a).0.is_empty());
    assert_eq!(state(&mut a), state(&mut b));
    assert_eq!(a.world.resource::<Matrix>().collagen.data, b.world.resource::<Matrix>().collagen.data);
    // The network's revision counts changes and differs; its segments do not.
    let (na, nb) = (a.world.resource::<Network>(), b.world.resource::<Network>());
    assert!(na.segments == nb.segments && na.closed == nb.closed, "networks differ after the restart");
    assert!(na.closed.iter().any(|&c| c), "the normalisation closed immature vessels");
}

#[test]
fn a_run_with_oxygen_resumed_mid_treatment_continues_exactly() {
    // As above with the oxygen process on: the normalisation closes vessels after the checkpoint
    // (re-solves of the oxygen field follow), and the resumed run's oxygen field, cell states and
    // solve count equal the uninterrupted run's bit for bit. The checkpoint at 1 h falls between
    // two normalisation updates (every 20 min from 0.5 h). Blood at a constant level, and
    // carried along the vessels (its levels are part of the checkpoint).
    for blood in ["constant", "along-vessels"] {
        resumed_with_oxygen(&format!(
            "{}\n[oxygen]\nenabled = true\nblood_transport = \"{blood}\"\n",
            treated_network()
        ));
    }
}

/// The oxygen restart checks of the test above for one scenario.
fn resumed_with_oxygen(text: &str) {
    let mut a = sim(text);
    run_to(&mut a, 7200.0);
    let (_, mut b) = restarted(text, text, 3600.0, 7200.0);
    assert_eq!(state(&mut a), state(&mut b));
    let (oa, ob) = (a.world.resource::<Oxygen>(), b.world.resource::<Oxygen>());
    assert!(oa.solves > 1, "the normalisation made the oxygen field re-solve ({} solves)", oa.solves);
    assert_eq!(oa.solves, ob.solves, "solve counts");
    assert_eq!(oa.report, ob.report, "last solve reports");
    assert!(oa.concentration.data == ob.concentration.data, "oxygen fields differ after the restart");
    assert_eq!(oa.states.data, ob.states.data, "cell states");
    assert!(oa.blood_pressure == ob.blood_pressure, "blood levels along the vessels");
    // A solve that was due at the checkpoint (here: the cells marked changed after the step) is
    // still due after the restart, and both runs make it from the same field.
    let dir = tempfile::tempdir().unwrap();
    let ck = dir.path().join("due.ckpt.h5");
    let mut c = sim(text);
    run_to(&mut c, 3600.0);
    c.world.resource_mut::<Occupancy>().set_changed();
    assert!(!oxygen::is_current(&c.world));
    interstice_sim::checkpoint::write(&mut c.world, &ck, "same").unwrap();
    let mut d = sim(text);
    interstice_sim::checkpoint::read(&mut d.world, &ck, "same").unwrap();
    assert!(!oxygen::is_current(&d.world), "the due solve was lost in the restart");
    run_to(&mut c, 7200.0);
    run_to(&mut d, 7200.0);
    let (oc, od) = (c.world.resource::<Oxygen>(), d.world.resource::<Oxygen>());
    assert_eq!((oc.solves, oc.report), (od.solves, od.report));
    assert!(oc.concentration.data == od.concentration.data && oc.states.data == od.states.data);
}
