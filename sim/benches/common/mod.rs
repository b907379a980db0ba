//! What the packet benches share: the scenario and the packets they are given.

use interstice_sim::Simulation;
use interstice_sim::particles::Packets;
use interstice_sim::process::accounting::Ledger;
use interstice_sim::rng::{Domain, stream};

/// A 128^3 lattice with a tumour, cells and one targeted design. The plasma dose is small (1e10
/// particles), so the influx adds about a hundred packets a step and each size stays at its
/// label: with the default dose of 1e13 the influx added about 1.3e5 packets a step.
pub const SCENARIO: &str = r#"
[run]
name = "bench"
end_time_h = 1000.0
time_step_s = 20.0
snapshot_interval_h = 1000.0
[lattice]
shape = [128, 128, 128]
voxel_um = 20.0
[tumour]
radius_um = 900.0
[[particle]]
name = "np50"
hydrodynamic_radius_nm = 50.0
surface_potential_mV = -10.0
dose_particles = 1e10
packet_particles = 1000.0
[particle.ligand]
kon_per_M_s = 1e5
koff_per_s = 1e-4
valency = 2
"#;

/// Replaces the packets by `n` packets of 1000 particles at uniformly random places, in voxel
/// order, and books them as injected.
pub fn fill(sim: &mut Simulation, n: usize) {
    let l = sim.lattice().clone();
    let mut r = stream(1, Domain::Tissue, 77, n as u64);
    let ext = l.extent();
    let mut p = Packets::default();
    for _ in 0..n {
        p.push(&l, [r.uniform() * ext[0], r.uniform() * ext[1], r.uniform() * ext[2]], 0, 1000);
    }
    p.sort_by_voxel();
    sim.world.insert_resource(p);
    sim.world.resource_mut::<Ledger>().injected[0] = n as u64 * 1000;
}
