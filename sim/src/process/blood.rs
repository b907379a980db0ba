//! Blood in the vessel network (the `network` vessel model), in [`Phase::Blood`].
//!
//! At install the network is generated or imported ([`crate::vessels::generate`],
//! [`crate::vessels::import`]), blood flow is solved ([`crate::vessels::flow`]), the segments are
//! rasterised onto the lattice ([`VesselRaster`]), the wall coefficients of every segment and
//! particle design are computed from pore theory ([`crate::vessels::pore`]), and the per-voxel
//! Starling sums [`WallFluid`] are built for the pressure process:
//!
//! `lp_s(v) = sum_i Lp_i S_i(v)`, `drive(v) = sum_i Lp_i S_i(v) (p_mid,i - sigma_T,i (pi_v - pi_i(v)))`
//!
//! over the perfused segments `i` with wall area `S_i(v)` in voxel `v` (Starling 1896; Baxter and
//! Jain 1989, Microvasc Res 37:77), with `p_mid` the mid-segment blood pressure, `sigma_T` the
//! protein reflection of the segment's type and `pi_i` the interstitial oncotic pressure of the
//! voxel's region. Unperfused segments exchange nothing. Each step the system re-solves only when
//! [`Network::revision`] has changed.

use bevy_ecs::prelude::*;

use crate::error::{SimError, SimResult};
use crate::field::{Field, FieldRef};
use crate::io::{Column, ColumnData, SnapshotWriter};
use crate::lattice::Lattice;
use crate::params::{
    BloodParams, ContinuumVesselParams, NetworkParams, Params, ParticlePlasmaParams, StarlingParams, TumourGeometry,
};
use crate::process::output;
use crate::scenario::{NetworkSource, VesselModel, WallConductivitySource};
use crate::tissue::Regions;
use crate::vascular::WallFluid;
use crate::vessels::flow::{self, BloodFlow, FlowOptions};
use crate::vessels::network::{Network, SegmentFlow, SegmentGeometry, SegmentPores, VesselSegment};
use crate::vessels::pore::{BODY_TEMPERATURE, pore_conductivity, stokes_einstein, wall_coefficients};
use crate::vessels::{VesselRaster, generate, import};
use crate::world::{Faults, Phase};

/// What the blood process needs each time it re-solves.
#[derive(Resource, Debug, Clone)]
pub struct BloodSettings {
    pub flow: FlowOptions,
    pub network: NetworkParams,
    pub blood: BloodParams,
    pub starling: StarlingParams,
    pub continuum: ContinuumVesselParams,
    pub particles: Vec<ParticlePlasmaParams>,
}

/// Wall coefficients of one particle design, per segment.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct SpeciesWalls {
    pub name: String,
    /// Free diffusivity used, m^2/s (Stokes-Einstein in plasma at 37 C).
    pub d0: f64,
    /// Diffusive permeability P, m/s, and reflection coefficient sigma_f, per segment.
    pub permeability: Vec<f64>,
    pub reflection: Vec<f64>,
}

/// Wall transport coefficients of every segment: Lp, and P and sigma_f per particle design.
#[derive(Resource, Debug, Clone, Default, PartialEq)]
pub struct SegmentWalls {
    pub revision: u64,
    /// Hydraulic conductivity in use, m/(Pa s), per segment.
    pub lp: Vec<f64>,
    /// One entry per particle design, in species order.
    pub species: Vec<SpeciesWalls>,
}

/// Vessel wall surface per tissue volume of each voxel, 1/m (for output).
#[derive(Resource, Debug, Clone)]
pub struct VesselSurface(pub Field);

/// The flow options of a scenario.
pub fn flow_options(n: &NetworkParams, b: &BloodParams) -> FlowOptions {
    FlowOptions {
        law: n.viscosity_law,
        haematocrit: b.haematocrit,
        plasma_viscosity: b.plasma_viscosity,
        tolerance: n.solver_tolerance,
        min_velocity: n.min_perfused_velocity,
    }
}

/// The network of a scenario: generated or imported.
pub fn build_network(n: &NetworkParams, l: &Lattice, g: &TumourGeometry, seed: u64) -> SimResult<Network> {
    let net = match n.source {
        NetworkSource::Tumour => generate::generate(l, g, n, seed, true),
        NetworkSource::CapillaryBed => generate::generate(l, g, n, seed, false),
        NetworkSource::Csv => import::read_csv(&n.nodes_csv, &n.segments_csv, n, g)?,
        NetworkSource::Vtk => import::read_vtk(&n.vtk_file, n, g)?,
    };
    if net.segments.is_empty() {
        return Err(SimError::Input {
            path: "vessels.network".into(),
            what: "the generated network has no segments (is the lattice smaller than the capillary spacing?)".into(),
        });
    }
    Ok(net)
}

/// Lp, P and sigma_f of every segment for every particle design.
pub fn segment_walls(net: &Network, s: &BloodSettings) -> SegmentWalls {
    let mu = s.blood.plasma_viscosity;
    let lp = net
        .segments
        .iter()
        .map(|seg| match s.network.wall_conductivity {
            WallConductivitySource::Pores => {
                pore_conductivity(seg.pore_radius, seg.pore_fraction, seg.wall_thickness, mu)
            }
            WallConductivitySource::TypeDefaults => s.continuum.wall_conductivity[seg.kind.index()],
        })
        .collect();
    let species = s
        .particles
        .iter()
        .map(|p| {
            let d0 = stokes_einstein(p.hydrodynamic_radius, mu, BODY_TEMPERATURE);
            let c: Vec<_> = net
                .segments
                .iter()
                .map(|seg| {
                    wall_coefficients(
                        seg.pore_radius,
                        seg.pore_fraction,
                        seg.wall_thickness,
                        p.hydrodynamic_radius,
                        d0,
                        mu,
                        s.network.hindrance,
                    )
                })
                .collect();
            SpeciesWalls {
                name: p.name.clone(),
                d0,
                permeability: c.iter().map(|w| w.permeability).collect(),
                reflection: c.iter().map(|w| w.reflection).collect(),
            }
        })
        .collect();
    SegmentWalls { revision: net.revision, lp, species }
}

/// The per-voxel Starling sums of the perfused segments (see the module documentation).
pub fn network_wall_fluid(
    l: &Lattice,
    regions: &Regions,
    net: &Network,
    raster: &VesselRaster,
    flow: &BloodFlow,
    walls: &SegmentWalls,
    st: &StarlingParams,
) -> WallFluid {
    let n = l.len();
    let mut lp_s = Field::filled("wall_lp_s", "m3 Pa-1 s-1", "sum of Lp S of the vessel walls in the voxel", n, 0.0);
    let mut drive = Field::filled("wall_drive", "m3 s-1", "sum of Lp S (p_v - sigma_T (pi_v - pi_i))", n, 0.0);
    for v in 0..n {
        let region = regions.region.data[v] as usize;
        let (mut a, mut d) = (0.0, 0.0);
        for (s, area) in raster.voxel(v) {
            let s = s as usize;
            if !flow.perfused[s] {
                continue;
            }
            let kind = net.segments[s].kind.index();
            let ls = walls.lp[s] * area;
            let oncotic = st.protein_reflection[kind] * (st.plasma_oncotic - st.interstitial_oncotic[region]);
            a += ls;
            d += ls * (flow.mid_pressure[s] - oncotic);
        }
        lp_s.data[v] = a;
        drive.data[v] = d;
    }
    WallFluid { lp_s, drive }
}

/// Everything derived from a network revision.
struct Derived {
    flow: BloodFlow,
    raster: VesselRaster,
    walls: SegmentWalls,
    fluid: WallFluid,
    surface: VesselSurface,
}

fn derive(net: &Network, l: &Lattice, regions: &Regions, s: &BloodSettings) -> SimResult<Derived> {
    let flow = flow::solve(net, &s.flow)?;
    let raster = VesselRaster::build(net, l);
    let walls = segment_walls(net, s);
    let fluid = network_wall_fluid(l, regions, net, &raster, &flow, &walls, &s.starling);
    let surface = VesselSurface(raster.surface_field(l));
    Ok(Derived { flow, raster, walls, fluid, surface })
}

/// Spawns (or respawns) one entity per segment with the segment's current state.
fn sync_entities(world: &mut World) {
    let old: Vec<Entity> = world.query_filtered::<Entity, With<VesselSegment>>().iter(world).collect();
    for e in old {
        world.despawn(e);
    }
    let batch: Vec<_> = {
        let net = world.resource::<Network>();
        let flow = world.resource::<BloodFlow>();
        let walls = world.resource::<SegmentWalls>();
        net.segments
            .iter()
            .enumerate()
            .map(|(i, seg)| {
                let (a, b) = net.ends(i);
                (
                    VesselSegment { index: i as u32, kind: seg.kind },
                    SegmentGeometry {
                        a,
                        b,
                        radius: seg.radius,
                        length: seg.length,
                        wall_thickness: seg.wall_thickness,
                    },
                    SegmentPores {
                        pore_radius: seg.pore_radius,
                        pore_fraction: seg.pore_fraction,
                        maturity: seg.maturity,
                        lp: walls.lp[i],
                    },
                    SegmentFlow {
                        flow: flow.flow[i],
                        velocity: flow.velocity[i],
                        wall_shear: flow.wall_shear[i],
                        mid_pressure: flow.mid_pressure[i],
                        perfused: flow.perfused[i],
                    },
                )
            })
            .collect()
    };
    world.spawn_batch(batch);
}

fn insert(world: &mut World, d: Derived) {
    world.insert_resource(d.flow);
    world.insert_resource(d.raster);
    world.insert_resource(d.walls);
    world.insert_resource(d.fluid);
    world.insert_resource(d.surface);
}

/// Adds the blood process when the scenario uses the network vessel model: builds the network
/// and everything derived from it, and inserts [`WallFluid`] for the pressure process.
pub fn install(world: &mut World, schedule: &mut Schedule, params: &Params) -> SimResult<()> {
    if params.vessel_model != VesselModel::Network {
        return Ok(());
    }
    let settings = BloodSettings {
        flow: flow_options(&params.network, &params.blood),
        network: params.network.clone(),
        blood: params.blood.clone(),
        starling: params.starling.clone(),
        continuum: params.continuum_vessels.clone(),
        particles: params.particles.clone(),
    };
    let l = world.resource::<Lattice>().clone();
    // The terrain builds (and may grow) the network; build it here when it did not.
    let net = match world.remove_resource::<Network>() {
        Some(net) => net,
        None => build_network(&params.network, &l, &params.tumour, params.run.seed)?,
    };
    let d = derive(&net, &l, world.resource::<Regions>(), &settings)?;
    world.insert_resource(net);
    insert(world, d);
    world.insert_resource(settings);
    sync_entities(world);
    output::add_part(world, vessels_part);
    output::add_series(world, vessels_series);
    schedule.add_systems(update_blood.in_set(Phase::Blood));
    Ok(())
}

/// Re-solves flow, raster, wall coefficients and [`WallFluid`] when the network has changed.
pub fn update_blood(world: &mut World) {
    let (rev, solved) = (world.resource::<Network>().revision, world.resource::<BloodFlow>().revision);
    if rev == solved {
        return;
    }
    let l = world.resource::<Lattice>().clone();
    let result =
        derive(world.resource::<Network>(), &l, world.resource::<Regions>(), world.resource::<BloodSettings>());
    match result {
        Ok(d) => {
            insert(world, d);
            sync_entities(world);
        }
        Err(e) => world.resource_mut::<Faults>().0.push(e),
    }
}

fn vessels_series(world: &World, out: &mut Vec<(&'static str, &'static str, f64)>) {
    let f = world.resource::<BloodFlow>();
    out.push(("vessels_perfused_fraction", "1", f.perfused_fraction()));
    out.push(("vessels_total_inflow", "m3 s-1", f.total_inflow));
}

fn vessels_part(world: &World, w: &mut SnapshotWriter<'_>) -> SimResult<()> {
    let net = world.resource::<Network>();
    let flow = world.resource::<BloodFlow>();
    let walls = world.resource::<SegmentWalls>();
    let lattice = world.resource::<Lattice>();
    let regions = world.resource::<Regions>();
    w.field(FieldRef::F64(&world.resource::<VesselSurface>().0))?;
    let n = net.segments.len();
    let mut ends: Vec<Vec<f64>> = (0..6).map(|_| Vec::with_capacity(n)).collect();
    for s in 0..n {
        let (a, b) = net.ends(s);
        for k in 0..3 {
            ends[k].push(a[k]);
            ends[3 + k].push(b[k]);
        }
    }
    let col = |f: fn(&crate::vessels::Segment) -> f64| -> Vec<f64> { net.segments.iter().map(f).collect() };
    let radius = col(|s| s.radius);
    let length = col(|s| s.length);
    let wall = col(|s| s.wall_thickness);
    let pore = col(|s| s.pore_radius);
    let pore_fraction = col(|s| s.pore_fraction);
    let maturity = col(|s| s.maturity);
    let kind: Vec<u8> = net.segments.iter().map(|s| s.kind as u8).collect();
    let perfused: Vec<u8> = flow.perfused.iter().map(|&p| u8::from(p)).collect();
    let region: Vec<u8> = (0..n)
        .map(|s| lattice.voxel_of(net.midpoint(s)).map_or(0, |c| regions.region.data[lattice.idx(c[0], c[1], c[2])]))
        .collect();
    let names = ["x0", "y0", "z0", "x1", "y1", "z1"];
    let mut cols: Vec<Column<'_>> = (0..6)
        .map(|k| Column {
            name: names[k],
            units: "m",
            description: if k < 3 { "centre-line start point (node a)" } else { "centre-line end point (node b)" },
            data: ColumnData::F64(&ends[k]),
        })
        .collect();
    let f64s: [(&str, &str, &str, &[f64]); 12] = [
        ("radius", "m", "lumen radius", &radius),
        ("length", "m", "length along the vessel", &length),
        ("wall_thickness", "m", "wall (pore) thickness", &wall),
        ("pore_radius", "m", "wall pore radius", &pore),
        ("pore_fraction", "1", "fraction of wall area open as pores", &pore_fraction),
        ("maturity", "1", "1 normal vessel, lower for leaky immature vessels", &maturity),
        ("lp", "m Pa-1 s-1", "wall hydraulic conductivity", &walls.lp),
        ("viscosity", "Pa s", "apparent blood viscosity", &flow.viscosity),
        ("flow", "m3 s-1", "blood flow from (x0, y0, z0) to (x1, y1, z1)", &flow.flow),
        ("velocity", "m s-1", "mean blood velocity (signed like flow)", &flow.velocity),
        ("wall_shear", "Pa", "wall shear stress", &flow.wall_shear),
        ("mid_pressure", "Pa", "blood pressure at the middle (NaN without a pressure boundary)", &flow.mid_pressure),
    ];
    let pa: Vec<f64> = net.segments.iter().map(|s| flow.node_pressure[s.a as usize]).collect();
    let pb: Vec<f64> = net.segments.iter().map(|s| flow.node_pressure[s.b as usize]).collect();
    for (name, units, description, data) in f64s {
        cols.push(Column { name, units, description, data: ColumnData::F64(data) });
    }
    cols.push(Column {
        name: "pressure_a",
        units: "Pa",
        description: "blood pressure at node a",
        data: ColumnData::F64(&pa),
    });
    cols.push(Column {
        name: "pressure_b",
        units: "Pa",
        description: "blood pressure at node b",
        data: ColumnData::F64(&pb),
    });
    cols.push(Column {
        name: "perfused",
        units: "1",
        description: "1 perfused, 0 not",
        data: ColumnData::U8(&perfused),
    });
    cols.push(Column {
        name: "kind",
        units: "1",
        description: "0 host capillary, 1 tumour vessel",
        data: ColumnData::U8(&kind),
    });
    cols.push(Column {
        name: "region",
        units: "1",
        description: "region of the voxel holding the midpoint (0 host, 1 tumour)",
        data: ColumnData::U8(&region),
    });
    let sp_names: Vec<(String, String)> =
        walls.species.iter().map(|s| (format!("permeability_{}", s.name), format!("reflection_{}", s.name))).collect();
    for (sp, (pn, rn)) in walls.species.iter().zip(&sp_names) {
        cols.push(Column {
            name: pn,
            units: "m s-1",
            description: "wall diffusive permeability",
            data: ColumnData::F64(&sp.permeability),
        });
        cols.push(Column {
            name: rn,
            units: "1",
            description: "wall reflection coefficient",
            data: ColumnData::F64(&sp.reflection),
        });
    }
    w.table("vessels", &cols)
}
