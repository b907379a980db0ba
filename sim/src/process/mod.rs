//! The processes of a step, one module each. [`install`] adds each process's resources and
//! systems to the world and schedule, in its [`crate::world::Phase`].

pub mod accounting;
pub mod binding;
pub mod blood;
pub mod exchange;
pub mod interventions;
pub mod output;
pub mod oxygen;
pub mod plasma;
pub mod pressure;
pub mod transport;

use bevy_ecs::prelude::*;

use crate::error::SimResult;
use crate::params::Params;

/// Adds every process of the scenario to the world and the step schedule.
pub fn install(world: &mut World, schedule: &mut Schedule, params: &Params) -> SimResult<()> {
    // Vessels and plasma first: the pressure process reads the `WallFluid` the blood process inserts.
    blood::install(world, schedule, params)?;
    plasma::install(world, schedule, params)?;
    oxygen::install(world, schedule, params)?;
    output::install(world, schedule, params);
    pressure::install(world, schedule, params)?;
    world.insert_resource(params.designs.clone());
    accounting::install(world);
    transport::install(world, schedule, params);
    exchange::install(world, schedule, params);
    binding::install(world, schedule, params);
    interventions::install(world, schedule, params);
    Ok(())
}
