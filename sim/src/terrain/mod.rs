//! The heterogeneous terrain of a run: the tissue generator ([`generator`]: tumour shape or
//! mask, cells, correlated random fields of [`random_field`]) and the optional growth phase
//! before dosing ([`growth`]).

pub mod generator;
pub mod growth;
pub mod random_field;

use bevy_ecs::prelude::*;

use crate::error::SimResult;
use crate::field::FieldRef;
use crate::io::SnapshotWriter;
use crate::lattice::Lattice;
use crate::params::Params;
use crate::process::output;
use crate::scenario::VesselModel;
use crate::tissue::{Regions, TUMOUR, place_cells};
use generator::TerrainFactors;

/// Builds the terrain into `world` (which holds the [`Lattice`]): regions, heterogeneity
/// factors, matrix, cells, the vessel network of the network model (thinned by the vessel
/// density factor), then grows the tumour when the scenario asks. A mask replaces
/// `params.tumour` by its bounding ellipsoid.
pub fn build(world: &mut World, params: &mut Params) -> SimResult<()> {
    build_with(world, params, true)
}

/// [`build`], keeping growth snapshots only when `keep_frames` (benches and tests skip them).
pub fn build_with(world: &mut World, params: &mut Params, keep_frames: bool) -> SimResult<()> {
    let l = world.resource::<Lattice>().clone();
    let seed = params.run.seed;
    let regions = generator::regions(params)?;
    let factors = TerrainFactors::draw(&l, &params.tissue, seed);
    let matrix = generator::matrix(&regions, &params.matrix, &factors);
    let receptor = (params.tissue.receptors.cv > 0.0).then_some(&factors.receptors.data[..]);
    place_cells(world, &l, &regions, &params.cells, seed, params.tissue.stromal_fraction, receptor);
    if params.vessel_model == VesselModel::Network {
        let mut net = crate::process::blood::build_network(&params.network, &l, &params.tumour, seed)?;
        if params.tissue.vessel_density.cv > 0.0 {
            generator::thin_tumour_vessels(&mut net, &l, &factors, seed);
        }
        world.insert_resource(net);
    }
    world.insert_resource(regions);
    world.insert_resource(matrix);
    world.insert_resource(factors);
    world.insert_resource(params.continuum_vessels.clone());
    if params.growth.enabled {
        growth::grow(world, params, keep_frames)?;
    }
    if [params.tissue.matrix, params.tissue.receptors, params.tissue.vessel_density].iter().any(|h| h.cv > 0.0) {
        output::add_part(world, factors_part);
    }
    output::add_series(world, vessel_density_series);
    Ok(())
}

fn factors_part(world: &World, w: &mut SnapshotWriter<'_>) -> SimResult<()> {
    let f = world.resource::<TerrainFactors>();
    w.field(FieldRef::F64(&f.matrix))?;
    w.field(FieldRef::F64(&f.receptors))?;
    w.field(FieldRef::F64(&f.vessel_density))
}

/// Mean vessel wall surface per tissue volume (1/m) of host and tumour voxels.
pub fn vessel_density_by_region(world: &World) -> [f64; 2] {
    let regions = world.resource::<Regions>();
    let mut sum = [0.0; 2];
    let mut count = [0usize; 2];
    let surface = world.get_resource::<crate::process::blood::VesselSurface>();
    let cont = world.get_resource::<crate::params::ContinuumVesselParams>();
    let density = world.get_resource::<TerrainFactors>();
    for (v, &r) in regions.region.data.iter().enumerate() {
        let r = usize::from(r == TUMOUR);
        count[r] += 1;
        sum[r] += match (surface, cont) {
            (Some(s), _) => s.0.data[v],
            (None, Some(c)) => {
                c.surface_per_volume[r] * if r == 1 { density.map_or(1.0, |d| d.vessel_density.data[v]) } else { 1.0 }
            }
            _ => 0.0,
        };
    }
    [sum[0] / count[0].max(1) as f64, sum[1] / count[1].max(1) as f64]
}

fn vessel_density_series(world: &World, out: &mut Vec<(&'static str, &'static str, f64)>) {
    let [h, t] = vessel_density_by_region(world);
    out.push(("vessel_surface_host", "m-1", h));
    out.push(("vessel_surface_tumour", "m-1", t));
}

/// `interstice check` lines of the oxygen and growth settings: the expected oxygen diffusion
/// distance `sqrt(2 D c_b / Vmax)` (zero-order consumption in a slab supplied on one side), and
/// the growth steps and doublings.
pub fn check_lines(p: &Params, out: &mut Vec<crate::check::Derived>) {
    use crate::check::d;
    let o = &p.oxygen;
    let dist = o.diffusion_distance();
    out.push(d(
        "oxygen",
        "diffusion distance",
        dist * 1e6,
        "um",
        &format!(
            "sqrt(2 D c_b / Vmax), {:.1} voxels{}",
            dist / p.lattice.h,
            if o.enabled { "" } else { " (oxygen is off: [oxygen] enabled = false)" }
        ),
    ));
    out.push(d("oxygen", "blood oxygen", o.blood, "mol/m3", "c_b = solubility x blood pO2"));
    out.push(d("oxygen", "max consumption", o.vmax, "mol/(m3 s)", "Vmax of a voxel full of living cells"));
    if let Some(law) = &o.along_vessels {
        out.push(d(
            "oxygen",
            "inlet blood oxygen",
            law.content(law.inlet),
            "mol/m3",
            &format!(
                "carried along the vessels: alpha P + H S(P) at the inlet, {:.1} % saturated (Hill)",
                100.0 * law.saturation(law.inlet)
            ),
        ));
    }
    let g = &p.growth;
    if g.enabled && g.signal == crate::scenario::AngiogenicSignal::Diffusing {
        out.push(d(
            "growth",
            "signal decay length",
            g.signal_length * 1e6,
            "um",
            &format!(
                "diffusing angiogenic signal, {:.1} voxels; sprouts where it reaches {}",
                g.signal_length / p.lattice.h,
                g.signal_threshold
            ),
        ));
    }
    if g.enabled {
        out.push(d("growth", "growth steps", (g.duration / g.time_step).ceil(), "1", "before dosing"));
        out.push(d("growth", "doublings", g.duration / g.cycle_time, "1", "unconstrained, duration / cycle time"));
        out.push(d(
            "growth",
            "growth snapshots",
            (g.duration / g.snapshot_interval).ceil() + 1.0,
            "1",
            "in /growth of the run file",
        ));
    }
}
