//! Receptor binding against the Langmuir isotherm.

use std::path::Path;

use interstice_sim::particles::Packets;
use interstice_sim::process::accounting::{Ledger, verify};
use interstice_sim::process::transport::MotionFields;
use interstice_sim::tissue::CellLoad;
use interstice_sim::units::per_molar_s_to_m3_per_s;
use interstice_sim::{LoadedScenario, Simulation};

#[test]
fn stochastic_binding_equilibrium_follows_langmuir() {
    // Langmuir isotherm B/R = C/(KD + C), KD = koff/kon (mass action at equilibrium without
    // internalisation). Cells fill every voxel of a closed box with R receptors each; free
    // particles are spread uniformly and do not move (D = 0), so every voxel is its own
    // well-mixed compartment.
    let (kon, koff, receptors) = (1e5, 1e-2, 1e4);
    let text = format!(
        r#"
[run]
end_time_h = 10.0
time_step_s = 0.5
snapshot_interval_h = 10.0
[lattice]
shape = [4, 4, 4]
voxel_um = 10.0
[tumour]
radius_um = 5.0
[cells]
tumour_cell_fraction = 0.0
host_cell_fraction = 1.0
host_receptors_per_cell = {receptors}
[binding]
matrix_adsorption_per_s_mV = 0.0
receptor_recycling_per_s = 0.0
[vessels.continuum]
host_surface_per_volume_per_cm = 0.0
tumour_surface_per_volume_per_cm = 0.0
[[particle]]
name = "ab"
dose_particles = 0.0
packet_particles = 100.0
surface_potential_mV = 0.0
[particle.ligand]
receptor = "host"
kon_per_M_s = {kon}
koff_per_s = {koff}
internalisation_per_s = 0.0
"#
    );
    let loaded = LoadedScenario::from_text(Path::new("langmuir.toml"), text).unwrap();
    let mut sim = Simulation::new(&loaded).unwrap();
    let l = sim.lattice().clone();
    let a = 0.3;
    sim.world.insert_resource(MotionFields::uniform(&l, 0.0, a));
    let per_voxel_packets = 200u64;
    let w = 100u64;
    {
        let mut r = interstice_sim::rng::stream(1, interstice_sim::rng::Domain::Tissue, 9, 0);
        let mut p = sim.world.resource_mut::<Packets>();
        for v in 0..l.len() {
            let c = l.centre(l.ijk(v));
            for _ in 0..per_voxel_packets {
                let x = [
                    c[0] + (r.uniform() - 0.5) * l.h,
                    c[1] + (r.uniform() - 0.5) * l.h,
                    c[2] + (r.uniform() - 0.5) * l.h,
                ];
                p.push(&l, x, 0, w);
            }
        }
    }
    let total = l.len() as u64 * per_voxel_packets * w;
    sim.world.resource_mut::<Ledger>().injected[0] = total;
    let vacc = a * l.voxel_volume() * l.len() as f64;
    let kd = koff / per_molar_s_to_m3_per_s(kon); // particles per m^3
    let r_total = receptors * l.len() as f64;
    let steps = 2400;
    let mut samples = Vec::new();
    for step in 0..steps {
        sim.step().unwrap();
        if step >= steps / 2 {
            interstice_sim::process::binding::hand_over_gains(&mut sim.world);
            let mut bound = 0u64;
            for load in sim.world.query::<&CellLoad>().iter(&sim.world) {
                bound += load.bound[0];
            }
            let free = total - bound;
            let c = free as f64 / vacc;
            samples.push((bound as f64 / r_total, c / (kd + c)));
        }
    }
    verify(&sim.world).expect("accounting closes");
    // Batch means: 10 batches of the second half.
    let nb = 10;
    let len = samples.len() / nb;
    let means: Vec<f64> =
        (0..nb).map(|b| samples[b * len..(b + 1) * len].iter().map(|s| s.0 - s.1).sum::<f64>() / len as f64).collect();
    let mean = means.iter().sum::<f64>() / nb as f64;
    let se = (means.iter().map(|m| (m - mean).powi(2)).sum::<f64>() / (nb as f64 - 1.0) / nb as f64).sqrt();
    let theta: f64 = samples.iter().map(|s| s.1).sum::<f64>() / samples.len() as f64;
    // The explicit split of binding and release over a step biases the equilibrium by at most
    // the fraction (kon C + koff) dt of the bound amount (first-order operator splitting).
    let c_eq = kd * theta / (1.0 - theta);
    let bias = (per_molar_s_to_m3_per_s(kon) * c_eq + koff) * 0.5 * theta;
    assert!(theta > 0.2 && theta < 0.8, "the test point should be mid-isotherm: {theta}");
    assert!(mean.abs() < 5.0 * se + bias, "bound fraction - Langmuir = {mean:e} (se {se:e}, bias bound {bias:e})");
}
