//! The heterogeneous terrain at 200^3 voxels (10 um voxels, a 2 mm box): a spherical tumour of
//! radius 600 um with one cancer cell in every tumour voxel (host voxels half filled), stromal
//! cells, log-normal matrix, receptor and vessel density factors, continuum vessels, oxygen on.
//! Times generating the tissue (target under 10 s) and one day of growth in 2 h steps (target
//! under 60 s), and prints the growth in size. Prints `name value unit` lines.
//! `TERRAIN_BENCH_N=100` runs a smaller lattice; `TERRAIN_BENCH_GROW=0` skips the growth.

use std::time::Instant;

use bevy_ecs::prelude::*;
use interstice_sim::params::Params;
use interstice_sim::process::oxygen::Oxygen;
use interstice_sim::scenario::Scenario;
use interstice_sim::tissue::{Cell, CellKind, Regions, TUMOUR};

fn main() {
    let n: usize = std::env::var("TERRAIN_BENCH_N").ok().and_then(|s| s.parse().ok()).unwrap_or(200);
    let mut s = Scenario::default();
    s.lattice.shape = [n; 3];
    s.lattice.voxel_um = 2000.0 / n as f64;
    s.tumour.radius_um = 600.0;
    s.cells.tumour_cell_fraction = 1.0;
    s.cells.tumour_phagocyte_fraction = 0.0;
    s.cells.host_cell_fraction = 0.5;
    s.tissue.tumour_stromal_fraction = 0.05;
    s.tissue.matrix_cv = 0.4;
    s.tissue.receptor_cv = 0.5;
    s.tissue.vessel_density_cv = 0.5;
    s.oxygen.enabled = true;
    let mut p = Params::resolve(&s);
    // The three random fields alone (part of the generation).
    let t0 = Instant::now();
    drop(interstice_sim::terrain::generator::TerrainFactors::draw(&p.lattice, &p.tissue, p.run.seed));
    println!("terrain_random_fields_{n}cubed {:.3} s", t0.elapsed().as_secs_f64());
    // Generation alone.
    let t0 = Instant::now();
    let mut world = World::new();
    world.insert_resource(p.lattice.clone());
    interstice_sim::terrain::build_with(&mut world, &mut p, false).expect("terrain builds");
    let generate = t0.elapsed().as_secs_f64();
    let cells = world.query::<&Cell>().iter(&world).count();
    println!("terrain_generate_{n}cubed {generate:.3} s");
    let cancer0 = world.query::<&Cell>().iter(&world).filter(|c| c.kind == CellKind::Cancer).count();
    let tumour0 = world.resource::<Regions>().region.data.iter().filter(|&&r| r == TUMOUR).count();
    println!("terrain_cells_{n}cubed {cells} cells");
    println!("terrain_cancer_cells_start_{n}cubed {cancer0} cells");
    println!("terrain_tumour_voxels_start_{n}cubed {tumour0} voxels");
    if std::env::var("TERRAIN_BENCH_GROW").is_ok_and(|v| v == "0") {
        return;
    }
    // One day of growth of that terrain, in 2 h steps.
    s.growth.enabled = true;
    s.growth.duration_d = 1.0;
    s.growth.time_step_h = 2.0;
    let p = Params::resolve(&s);
    let t0 = Instant::now();
    interstice_sim::terrain::growth::grow(&mut world, &p, false).expect("terrain grows");
    let grow = t0.elapsed().as_secs_f64();
    let cancer = world.query::<&Cell>().iter(&world).filter(|c| c.kind == CellKind::Cancer).count();
    let tumour = world.resource::<Regions>().region.data.iter().filter(|&&r| r == TUMOUR).count();
    let (hyp, nec) = world.resource::<Oxygen>().tumour_fractions(world.resource::<Regions>());
    println!("terrain_grow_one_day_{n}cubed {grow:.3} s");
    println!("terrain_tumour_voxels_after_one_day_{n}cubed {tumour} voxels");
    println!("terrain_cancer_cells_after_one_day_{n}cubed {cancer} cells");
    println!("terrain_hypoxic_fraction_after_one_day_{n}cubed {hyp:.4} 1");
    println!("terrain_necrotic_fraction_after_one_day_{n}cubed {nec:.4} 1");
}
