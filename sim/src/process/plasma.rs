//! Plasma pharmacokinetics of every particle design, in [`Phase::Blood`]: one [`PlasmaPool`] per
//! species (exact particle counts), dosed by its schedule ([`crate::vessels::dosing`]: every
//! bolus time and infusion start and end is a [`Breakpoints`] time) and stepped with the
//! elimination of [`crate::vessels::pk`].
//! The exchange process withdraws particles into the tissue and returns them with
//! [`PlasmaPool::withdraw`] and [`PlasmaPool::give_back`]; the balance
//! `dose + returned = plasma + peripheral + cleared + withdrawn` is checked every step.

use bevy_ecs::prelude::*;

use crate::error::{SimError, SimResult};
use crate::params::Params;
use crate::rng::{Domain, stream};
use crate::vessels::pk::{Elimination, PlasmaPool};
use crate::world::{Breakpoints, Clock, Faults, Phase, Seed, SpeciesNames};

/// Random-stream ids of the plasma steps: this tag plus the species index.
pub const STREAM_TAG: u64 = 6 << 56;

/// The plasma pool of every species, in species order.
#[derive(Resource, Debug, Clone, Default)]
pub struct PlasmaPools {
    pub pools: Vec<PlasmaPool>,
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
            Ok(PlasmaPool::scheduled(&p.name, p.schedule.clone(), params.blood.volume, plasma_volume, e))
        })
        .collect()
}

/// Adds the plasma pools and their elimination step.
pub fn install(world: &mut World, schedule: &mut Schedule, params: &Params) -> SimResult<()> {
    if params.particles.is_empty() {
        return Ok(());
    }
    let pools = pools(params)?;
    if !world.contains_resource::<SpeciesNames>() {
        world.insert_resource(SpeciesNames(pools.iter().map(|p| p.name.clone()).collect()));
    }
    // Every dose time ends a step, so boluses fall on step starts and infusions on whole steps.
    if let Some(mut breaks) = world.get_resource_mut::<Breakpoints>() {
        for t in pools.iter().flat_map(|p| p.schedule.breakpoints()) {
            breaks.add(t);
        }
    }
    world.insert_resource(PlasmaPools { pools });
    schedule.add_systems(step_plasma.in_set(Phase::Blood));
    Ok(())
}

/// Gives the step's doses, eliminates plasma particles over the step and checks the balance of every pool.
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
