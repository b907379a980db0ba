//! Exchange across the vessel wall: particles leave the plasma into the interstitium and return.
//!
//! For each wall patch `i` in a voxel (a continuum wall, or a rasterised segment), the fluid flux
//! is Starling's `Jv = Lp S (p_v - p - sigma_T (pi_v - pi_i))` and the particle flux is the
//! Kedem-Katchalsky / Patlak expression (Patlak, Goldstein and Hoffman 1963, J Theor Biol 5:426)
//!
//! `Js = Jv (1 - sigma_f) (Cv - Ci e^-Pe) / (1 - e^-Pe)`, `Pe = Jv (1 - sigma_f) / (P S)`,
//!
//! linear in the plasma concentration `Cv` and the interstitial one `Ci`: `Js = a Cv - b Ci`
//! with `a = Jv (1 - sigma_f) / (1 - e^-Pe)` and `b = a - Jv (1 - sigma_f)`. Its limits are
//! `P S (Cv - Ci)` as `Pe -> 0` and `Jv (1 - sigma_f) Cv` for large `Pe`. `P` and `sigma_f` come from
//! pore theory (Renkin 1954 or Dechadilok and Deen 2006); no particle passes a pore it does not
//! fit (`sigma_f = 1`, `P = 0`).
//!
//! Influx: each step, the expected `a Cv dt` particles of each voxel are withdrawn from the
//! plasma pool in whole packets; the fraction of a packet left over is carried to the next step
//! (so the long-run rate is exact and nothing is lost). Return: each free particle in a vessel
//! voxel goes back to the plasma with probability `1 - exp(-b dt / V_acc)`, drawn per packet as a
//! binomial count; returned particles rejoin the pool.

use bevy_ecs::prelude::*;
use rayon::prelude::*;

use crate::lattice::Lattice;
use crate::params::Params;
use crate::particles::packets::{PREFETCH_AHEAD, prefetch};
use crate::particles::{Designs, Packets};
use crate::process::blood::SegmentWalls;
use crate::process::plasma::PlasmaPools;
use crate::process::transport::MotionFields;
use crate::rng::{Domain, Streams, stream};
use crate::scenario::VesselModel;
use crate::tissue::{MAX_SPECIES, Regions};
use crate::vascular::ContinuumPores;
use crate::vessels::VesselRaster;
use crate::vessels::flow::BloodFlow;
use crate::vessels::network::Network;
use crate::vessels::pore::{BODY_TEMPERATURE, stokes_einstein, wall_coefficients};
use crate::world::{Clock, Phase, Seed};

/// One wall patch: its voxel, Starling terms, and per species `P S` and `1 - sigma_f`.
#[derive(Debug, Clone, PartialEq)]
pub struct Patch {
    pub voxel: u32,
    /// `Lp S`, m^3/(Pa s).
    pub lp_s: f64,
    /// `Lp S (p_v - sigma_T (pi_v - pi_i))`, m^3/s: `Jv = drive - lp_s p`.
    pub drive: f64,
    /// `P S`, m^3/s, per species.
    pub ps: [f64; MAX_SPECIES],
    /// `1 - sigma_f` per species.
    pub pass: [f64; MAX_SPECIES],
}

/// The Patlak coefficients `(a, b)` (m^3/s) of a wall with convective term `jv_eff = Jv (1 - sigma_f)`
/// and diffusive conductance `ps = P S`: `Js = a Cv - b Ci`.
pub fn patlak(jv_eff: f64, ps: f64) -> (f64, f64) {
    if ps <= 0.0 {
        // Pure convection: the flow carries what is upstream of the wall.
        return if jv_eff >= 0.0 { (jv_eff, 0.0) } else { (0.0, -jv_eff) };
    }
    let pe = jv_eff / ps;
    if pe.abs() < 1e-6 {
        // Series of Pe / (1 - e^-Pe) = 1 + Pe/2 + Pe^2/12.
        let a = ps * (1.0 + 0.5 * pe + pe * pe / 12.0);
        return (a, a - jv_eff);
    }
    if pe > 700.0 {
        return (jv_eff, 0.0);
    }
    let a = jv_eff / -(-pe).exp_m1();
    (a, a - jv_eff)
}

/// Wall patches and their Patlak coefficients for the current pressure.
#[derive(Resource, Debug, Clone, Default)]
pub struct WallExchange {
    pub patches: Vec<Patch>,
    /// Voxels with at least one patch, ascending, and per species their summed `a` (m^3/s).
    pub sites: Vec<u32>,
    pub influx: Vec<Vec<f64>>,
    /// Per species and voxel: return rate of one free particle, 1/s.
    pub return_rate: Vec<Vec<f64>>,
    /// Fraction of a packet carried to the next step, per species and site.
    pub carry: Vec<Vec<f64>>,
    /// Per species: the sites (indices into `sites`, ascending) whose walls let it in
    /// (`influx > 0`); the influx visits only these (elsewhere nothing enters and the carried
    /// fraction stays as it is).
    pub open: Vec<Vec<u32>>,
    /// Network revision and pressure solve the coefficients were computed for.
    pub seen: (u64, u64),
    /// Factor on the wall permeability of each species from an active route (a tissue-penetrating
    /// peptide, [`crate::process::interventions`]); missing entries are 1.
    pub route_factor: Vec<f64>,
    /// Scratch of the influx, kept between steps: whole packets each open site wants this step
    /// and the fraction it carries on, and the sites that get particles (site, particles, first
    /// new packet's row).
    wanted: Vec<u64>,
    left_over: Vec<f64>,
    births: Vec<(u32, u64, usize)>,
}

/// Patches of the continuum model: one uniform wall per voxel of each region, its pores scaled
/// per voxel by `pores` (normalisation and heating; none: as the scenario gives them) at the
/// pore area fraction of the region's walls, so `Lp` scales with the factor squared.
pub fn continuum_patches(l: &Lattice, regions: &Regions, p: &Params, pores: Option<&[f64]>) -> Vec<Patch> {
    let c = &p.continuum_vessels;
    let mu = p.blood.plasma_viscosity;
    let vol = l.voxel_volume();
    let mut out = Vec::new();
    for (v, &r) in regions.region.data.iter().enumerate() {
        let r = r as usize;
        let s = c.surface_per_volume[r] * vol;
        if s <= 0.0 {
            continue;
        }
        // The pore area fraction that gives the wall its Lp: Lp = gamma r0^2 / (8 mu Lw).
        let gamma = 8.0 * mu * c.wall_thickness * c.wall_conductivity[r] / (c.pore_radius[r] * c.pore_radius[r]);
        let f = pores.map_or(1.0, |x| x[v]);
        let pore = c.pore_radius[r] * f;
        let lp = c.wall_conductivity[r] * f * f;
        let mut patch = Patch {
            voxel: v as u32,
            lp_s: lp * s,
            drive: lp * s * (c.vascular_pressure - p.starling.oncotic_term(r)),
            ps: [0.0; MAX_SPECIES],
            pass: [0.0; MAX_SPECIES],
        };
        for (k, d) in p.designs.0.iter().enumerate() {
            let d0 = stokes_einstein(d.radius, mu, BODY_TEMPERATURE);
            let w = wall_coefficients(pore, gamma, c.wall_thickness, d.radius, d0, mu, p.network.hindrance);
            patch.ps[k] = w.permeability * s;
            patch.pass[k] = 1.0 - w.reflection;
        }
        out.push(patch);
    }
    out
}

/// Patches of the network model: one per (perfused segment, voxel) of the raster.
pub fn network_patches(world: &World, regions: &Regions, p: &Params) -> Vec<Patch> {
    let (Some(net), Some(raster), Some(flow), Some(walls)) = (
        world.get_resource::<Network>(),
        world.get_resource::<VesselRaster>(),
        world.get_resource::<BloodFlow>(),
        world.get_resource::<SegmentWalls>(),
    ) else {
        return Vec::new();
    };
    let st = &p.starling;
    let mut out = Vec::new();
    for v in 0..regions.region.len() {
        let region = regions.region.data[v] as usize;
        for (seg, area) in raster.voxel(v) {
            let s = seg as usize;
            if !flow.perfused[s] {
                continue;
            }
            let kind = net.segments[s].kind.index();
            let ls = walls.lp[s] * area;
            let oncotic = st.protein_reflection[kind] * (st.plasma_oncotic - st.interstitial_oncotic[region]);
            let mut patch = Patch {
                voxel: v as u32,
                lp_s: ls,
                drive: ls * (flow.mid_pressure[s] - oncotic),
                ps: [0.0; MAX_SPECIES],
                pass: [0.0; MAX_SPECIES],
            };
            for (k, sw) in walls.species.iter().enumerate().take(MAX_SPECIES) {
                patch.ps[k] = sw.permeability[s] * area;
                patch.pass[k] = 1.0 - sw.reflection[s];
            }
            out.push(patch);
        }
    }
    out
}

impl WallExchange {
    /// Recomputes the coefficients of every patch for the interstitial pressure `p` (Pa per voxel,
    /// or zero everywhere when none is computed).
    pub fn update(&mut self, l: &Lattice, motion: &MotionFields, species: usize, pressure: Option<&[f64]>) {
        let n = l.len();
        let vol = l.voxel_volume();
        let mut sites: Vec<u32> = self.patches.iter().map(|p| p.voxel).collect();
        sites.dedup();
        if sites != self.sites || self.carry.len() != species {
            self.carry = vec![vec![0.0; sites.len()]; species];
        }
        self.sites = sites;
        self.influx = vec![vec![0.0; self.sites.len()]; species];
        self.return_rate = vec![vec![0.0; n]; species];
        let mut site = 0usize;
        for (i, patch) in self.patches.iter().enumerate() {
            if i > 0 && patch.voxel != self.patches[i - 1].voxel {
                site += 1;
            }
            let v = patch.voxel as usize;
            let p = pressure.map_or(0.0, |p| p[v]);
            let jv = patch.drive - patch.lp_s * p;
            for s in 0..species {
                let route = self.route_factor.get(s).copied().unwrap_or(1.0);
                let (a, b) = patlak(jv * patch.pass[s], patch.ps[s] * route);
                self.influx[s][site] += a;
                let vacc = motion.a[s][v] * vol;
                if vacc > 0.0 {
                    self.return_rate[s][v] += b / vacc;
                }
            }
        }
        self.open = self
            .influx
            .iter()
            .map(|a| a.iter().enumerate().filter(|(_, a)| **a > 0.0).map(|(k, _)| k as u32).collect())
            .collect();
    }
}

/// Reads the interstitial pressure when a pressure process runs, and how many solves it made.
pub type PressureReader = fn(&World) -> Option<(&[f64], u64)>;

/// How the exchange reads the interstitial pressure (installed by the pressure process).
#[derive(Resource, Clone, Copy)]
pub struct PressureSource(pub PressureReader);

/// The revision of the vessel walls: the network's, or the continuum pores'.
fn wall_revision(world: &World) -> u64 {
    world
        .get_resource::<Network>()
        .map(|n| n.revision)
        .or_else(|| world.get_resource::<ContinuumPores>().map(|c| c.revision))
        .unwrap_or(0)
}

/// Rebuilds the patches when the vessel walls change and the coefficients when the pressure does.
pub fn refresh_exchange(world: &mut World) {
    let revision = wall_revision(world);
    let reader = world.get_resource::<PressureSource>().copied();
    let solves = reader.and_then(|r| (r.0)(world)).map_or(0, |(_, k)| k);
    let seen = world.resource::<WallExchange>().seen;
    if seen == (revision, solves) && !world.resource::<WallExchange>().influx.is_empty() {
        return;
    }
    let params = world.resource::<ExchangeParams>().0.clone();
    let l = world.resource::<Lattice>().clone();
    if revision != seen.0 {
        let regions = world.resource::<Regions>().clone();
        let patches = match params.vessel_model {
            VesselModel::Network => network_patches(world, &regions, &params),
            VesselModel::Continuum => {
                let pores = world.get_resource::<ContinuumPores>().map(|c| &c.factor[..]);
                continuum_patches(&l, &regions, &params, pores)
            }
        };
        world.resource_mut::<WallExchange>().patches = patches;
    }
    let species = world.resource::<Designs>().len();
    let pressure: Option<Vec<f64>> = reader.and_then(|r| (r.0)(world)).map(|(p, _)| p.to_vec());
    world.resource_scope(|world, mut ex: Mut<WallExchange>| {
        ex.update(&l, world.resource::<MotionFields>(), species, pressure.as_deref());
        ex.seen = (revision, solves);
    });
}

/// The scenario's parameters, kept for re-deriving patches.
#[derive(Resource, Debug, Clone)]
pub struct ExchangeParams(pub Params);

/// Influx from the plasma in whole packets, and the return of free particles to the plasma.
#[allow(clippy::too_many_arguments)] // a system's parameters are the resources it reads
pub fn exchange_system(
    lattice: Res<Lattice>,
    designs: Res<Designs>,
    clock: Res<Clock>,
    seed: Res<Seed>,
    mut ex: ResMut<WallExchange>,
    mut pools: ResMut<PlasmaPools>,
    mut packets: ResMut<Packets>,
) {
    let dt = clock.dt;
    if dt <= 0.0 {
        return;
    }
    let ns = designs.len();
    // Return first: it acts on the packets that were in the tissue at the start of the step.
    let WallExchange { return_rate, .. } = &*ex;
    let (step, seed) = (clock.step, seed.0);
    let Packets { id, voxel, species, weight, .. } = &mut *packets;
    let streams = Streams::new(seed, Domain::Extravasation);
    let returned = weight
        .par_chunks_mut(2048)
        .zip(voxel.par_chunks(2048))
        .zip(id.par_chunks(2048))
        .zip(species.par_chunks(2048))
        .map(|(((wt, vox), ids), sp)| {
            let mut back = [0u64; MAX_SPECIES];
            for i in 0..wt.len() {
                if let Some(&ahead) = vox.get(i + PREFETCH_AHEAD) {
                    prefetch(&return_rate[sp[i + PREFETCH_AHEAD] as usize][ahead as usize]);
                }
                let s = sp[i] as usize;
                let k = return_rate[s][vox[i] as usize];
                if k <= 0.0 || wt[i] == 0 {
                    continue;
                }
                let mut rng = streams.at(ids[i], step);
                let n = rng.binomial_of_rate(wt[i], k * dt);
                wt[i] -= n;
                back[s] += n;
            }
            back
        })
        .reduce(
            || [0u64; MAX_SPECIES],
            |mut a, b| {
                for s in 0..MAX_SPECIES {
                    a[s] += b[s];
                }
                a
            },
        );
    for (s, n) in returned.iter().enumerate().take(ns) {
        if *n > 0 {
            pools.get_mut(s).give_back(*n);
        }
    }
    // Influx: each open site's expected packets with its carried fraction (in parallel: every
    // site is its own), then the withdrawals from the plasma site by site in ascending order
    // (the pool can run short), then the new packets written in place in parallel. Ids follow
    // the site order and each site draws from its own stream, so the result is the same for
    // any thread count.
    let WallExchange { sites, influx, carry, open, wanted, left_over, births, .. } = &mut *ex;
    const SITES_PER_TASK: usize = 512;
    for s in 0..ns {
        let w = designs.0[s].packet;
        let cv = pools.get(s).concentration();
        if cv <= 0.0 {
            continue;
        }
        let (open, a, carry) = (&open[s], &influx[s], &mut carry[s]);
        wanted.resize(open.len(), 0);
        left_over.resize(open.len(), 0.0);
        wanted.par_iter_mut().zip(left_over.par_iter_mut()).zip(open.par_iter()).for_each(|((out, f), &k)| {
            let expected = a[k as usize] * cv * dt / w as f64 + carry[k as usize];
            let n = expected.floor();
            *f = expected - n;
            *out = if n < 1.0 { 0 } else { n as u64 };
        });
        births.clear();
        let mut rows = 0usize;
        for ((&k, &n), &f) in open.iter().zip(wanted.iter()).zip(left_over.iter()) {
            let k = k as usize;
            carry[k] = f;
            if n == 0 {
                continue;
            }
            let got = pools.get_mut(s).withdraw(n * w);
            if got == 0 {
                continue;
            }
            births.push((sites[k], got, rows));
            // Whole packets, and the remainder as a smaller one when the plasma ran short.
            rows += got.div_ceil(w) as usize;
        }
        if rows == 0 {
            continue;
        }
        // The new rows, cut where each task's sites begin.
        let mut tasks = Vec::with_capacity(births.len().div_ceil(SITES_PER_TASK));
        let mut rest = packets.append(rows);
        for (t, group) in births.chunks(SITES_PER_TASK).enumerate() {
            let end = births.get((t + 1) * SITES_PER_TASK).map_or(rows, |b| b.2);
            let (head, tail) = rest.split_at(end - group[0].2);
            tasks.push((group, head));
            rest = tail;
        }
        let h = lattice.h;
        let lattice = &*lattice;
        tasks.into_par_iter().for_each(|(group, mut out)| {
            let first = group[0].2;
            for &(v, got, row) in group {
                let c = lattice.centre(lattice.ijk(v as usize));
                let mut rng = stream(seed, Domain::Extravasation, u64::from(v) | ((s as u64 + 1) << 40), step);
                let (whole, part) = (got / w, got % w);
                let sizes = std::iter::repeat_n(w, whole as usize).chain((part > 0).then_some(part));
                for (j, size) in sizes.enumerate() {
                    let x = [
                        c[0] + (rng.uniform() - 0.5) * h,
                        c[1] + (rng.uniform() - 0.5) * h,
                        c[2] + (rng.uniform() - 0.5) * h,
                    ];
                    out.set(row - first + j, lattice, x, s as u8, size);
                }
            }
        });
    }
}

/// Adds the exchange process (a no-op without particles or without plasma).
pub fn install(world: &mut World, schedule: &mut Schedule, params: &Params) {
    if params.designs.is_empty() || !world.contains_resource::<PlasmaPools>() {
        return;
    }
    let patches = match params.vessel_model {
        VesselModel::Continuum => {
            let l = world.resource::<Lattice>().clone();
            continuum_patches(&l, world.resource::<Regions>(), params, None)
        }
        VesselModel::Network => {
            let regions = world.resource::<Regions>().clone();
            network_patches(world, &regions, params)
        }
    };
    let revision = wall_revision(world);
    world.insert_resource(WallExchange { patches, seen: (revision, u64::MAX), ..Default::default() });
    world.insert_resource(ExchangeParams(params.clone()));
    schedule.add_systems((refresh_exchange, exchange_system).chain().in_set(Phase::Exchange));
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn patlak_limits() {
        // Diffusive limit (Pe -> 0): a = b = P S.
        let (a, b) = patlak(1e-20, 1e-12);
        assert!((a / 1e-12 - 1.0).abs() < 1e-7 && (b / 1e-12 - 1.0).abs() < 1e-7);
        // Convective limit (Pe >> 1): a = Jv (1 - sigma), b -> 0.
        let (a, b) = patlak(1e-9, 1e-13);
        assert!((a / 1e-9 - 1.0).abs() < 1e-12 && b < 1e-12 * a);
        // Reverse flow carries interstitial particles back: a -> 0, b = -Jv (1 - sigma).
        let (a, b) = patlak(-1e-9, 1e-13);
        assert!(a < 1e-12 * b && (b / 1e-9 - 1.0).abs() < 1e-12);
        // Continuity across the series branch.
        let (a1, _) = patlak(0.99e-6 * 1e-12, 1e-12);
        let (a2, _) = patlak(1.01e-6 * 1e-12, 1e-12);
        assert!((a1 - a2).abs() / a1 < 1e-8);
        // Equilibrium of a closed voxel: Ci / Cv = a / b = e^Pe.
        let (a, b) = patlak(2e-12, 1e-12);
        assert!((a / b - 2f64.exp()).abs() < 1e-12);
    }
}
