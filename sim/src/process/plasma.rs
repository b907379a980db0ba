//! Plasma pharmacokinetics of every particle design, in [`Phase::Blood`]: one [`PlasmaPool`] per
//! species (exact particle counts), stepped with the elimination of [`crate::vessels::pk`].
//! The exchange process withdraws particles into the tissue and returns them with
//! [`PlasmaPool::withdraw`] and [`PlasmaPool::give_back`]; the balance
//! `dose + returned = plasma + peripheral + cleared + withdrawn` is checked every step.

use bevy_ecs::prelude::*;

use crate::error::{SimError, SimResult};
use crate::params::Params;
use crate::process::output;
use crate::rng::{Domain, stream};
use crate::vessels::pk::{Elimination, PlasmaPool};
use crate::world::{Clock, Faults, Phase, Seed, SpeciesNames};

/// Random-stream ids of the plasma steps: this tag plus the species index.
pub const STREAM_TAG: u64 = 6 << 56;

/// The plasma pool of every species, in species order.
#[derive(Resource, Debug, Clone, Default)]
pub struct PlasmaPools {
    pub pools: Vec<PlasmaPool>,
    /// Series names of each species: plasma amount, cleared amount.
    series_names: Vec<[&'static str; 2]>,
}

impl PlasmaPools {
    /// The pool of species `s`.
    pub fn get(&self, s: usize) -> &PlasmaPool {
        &self.pools[s]
    }

    /// The pool of species `s`, to withdraw or return particles.
    pub fn get_mut(&mut self, s: usize) -> &mut PlasmaPool {
        &mut self.pools[s]
    }
}

/// The pools of a scenario's particle designs (reads plasma tables).
pub fn pools(params: &Params) -> SimResult<Vec<PlasmaPool>> {
    let plasma_volume = params.blood.plasma_volume();
    params
        .particles
        .iter()
        .map(|p| {
            let e = Elimination::of(p, plasma_volume)?;
            Ok(PlasmaPool::bolus(&p.name, p.dose, params.blood.volume, plasma_volume, e))
        })
        .collect()
}

/// Adds the plasma pools and their elimination step.
pub fn install(world: &mut World, schedule: &mut Schedule, params: &Params) -> SimResult<()> {
    if params.particles.is_empty() {
        return Ok(());
    }
    let pools = pools(params)?;
    // Series names live as long as the program (a few short strings per run).
    let series_names = pools
        .iter()
        .map(|p| {
            [
                &*Box::leak(format!("plasma_{}", p.name).into_boxed_str()),
                &*Box::leak(format!("cleared_{}", p.name).into_boxed_str()),
            ]
        })
        .collect();
    if !world.contains_resource::<SpeciesNames>() {
        world.insert_resource(SpeciesNames(pools.iter().map(|p| p.name.clone()).collect()));
    }
    world.insert_resource(PlasmaPools { pools, series_names });
    output::add_series(world, plasma_series);
    schedule.add_systems(step_plasma.in_set(Phase::Blood));
    Ok(())
}

/// Eliminates plasma particles over the step and checks the balance of every pool.
pub fn step_plasma(mut pools: ResMut<PlasmaPools>, clock: Res<Clock>, seed: Res<Seed>, mut faults: ResMut<Faults>) {
    for (i, pool) in pools.pools.iter_mut().enumerate() {
        let mut s = stream(seed.0, Domain::Vessels, STREAM_TAG | i as u64, clock.step);
        pool.step(clock.time, clock.dt, &mut s);
        if !pool.balanced() {
            faults.0.push(SimError::Invariant {
                time_s: clock.time,
                step: clock.step,
                what: format!("plasma pool of {} does not balance: {pool:?}", pool.name),
            });
        }
    }
}

fn plasma_series(world: &World, out: &mut Vec<(&'static str, &'static str, f64)>) {
    let p = world.resource::<PlasmaPools>();
    for (pool, names) in p.pools.iter().zip(&p.series_names) {
        out.push((names[0], "particles", pool.amount as f64));
        out.push((names[1], "particles", pool.cleared as f64));
    }
}
