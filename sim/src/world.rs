//! The ECS world of a run and the schedule of one step.
//!
//! Data flows one way: scenario -> [`Params`] -> world (resources, entities) -> step -> snapshots.
//! One step runs the process sets in the order of the physics:
//!
//! 1. [`Phase::Blood`]: blood flow in the vessel network and the plasma pool,
//! 2. [`Phase::Pressure`]: interstitial fluid pressure and flow,
//! 3. [`Phase::Exchange`]: transport across the vessel walls,
//! 4. [`Phase::Transport`]: motion of particle packets through the interstitium,
//! 5. [`Phase::Binding`]: binding to receptors and matrix, internalisation, uptake, drainage,
//! 6. [`Phase::Interventions`]: scheduled changes of the model's parameters,
//! 7. [`Phase::Advance`]: the clock moves on,
//! 8. [`Phase::Output`]: snapshots when one is due.
//!
//! A process joins the schedule only when it does its real computation; each lives in its own
//! module under [`crate::process`].

use std::time::Instant;

use bevy_ecs::prelude::*;
use bevy_ecs::schedule::ScheduleLabel;

use crate::error::{SimError, SimResult};
use crate::lattice::Lattice;
use crate::params::Params;
use crate::process;
use crate::progress::Progress;
use crate::scenario::LoadedScenario;

/// The process sets of one step, in the order they run.
#[derive(SystemSet, Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Phase {
    Blood,
    Pressure,
    Exchange,
    Transport,
    Binding,
    Interventions,
    Advance,
    Output,
}

impl Phase {
    /// Every set, in the order they run.
    pub const ALL: [Phase; 8] = [
        Phase::Blood,
        Phase::Pressure,
        Phase::Exchange,
        Phase::Transport,
        Phase::Binding,
        Phase::Interventions,
        Phase::Advance,
        Phase::Output,
    ];

    /// The set's name in reports.
    pub fn name(self) -> &'static str {
        match self {
            Phase::Blood => "blood",
            Phase::Pressure => "pressure",
            Phase::Exchange => "exchange",
            Phase::Transport => "transport",
            Phase::Binding => "binding",
            Phase::Interventions => "interventions",
            Phase::Advance => "advance",
            Phase::Output => "output",
        }
    }
}

/// Wall-clock time spent in each process set since the world was built, s, indexed as
/// [`Phase::ALL`]: a lap is taken after every set (timing never changes results).
#[derive(Resource, Debug, Clone)]
pub struct PhaseTimes {
    pub seconds: [f64; 8],
    mark: Instant,
}

impl Default for PhaseTimes {
    fn default() -> Self {
        PhaseTimes { seconds: [0.0; 8], mark: Instant::now() }
    }
}

impl PhaseTimes {
    /// Starts the laps of a step.
    fn start(&mut self) {
        self.mark = Instant::now();
    }

    /// Books the time since the last mark to set `k`.
    fn lap(&mut self, k: usize) {
        let now = Instant::now();
        self.seconds[k] += (now - self.mark).as_secs_f64();
        self.mark = now;
    }

    /// Sets and their seconds, in schedule order.
    pub fn by_phase(&self) -> impl Iterator<Item = (Phase, f64)> + '_ {
        Phase::ALL.iter().copied().zip(self.seconds.iter().copied())
    }

    /// `name=seconds` of every set, space-separated (the run file's provenance `process_wall_s`).
    pub fn record(&self) -> String {
        self.by_phase().map(|(p, s)| format!("{}={s:.3}", p.name())).collect::<Vec<_>>().join(" ")
    }

    /// One line for a report: each set's seconds and share of the total, sets that would print
    /// as 0.00 s (under 5 ms) left out.
    pub fn summary(&self) -> String {
        let total: f64 = self.seconds.iter().sum();
        self.by_phase()
            .filter(|&(_, s)| s >= 5e-3)
            .map(|(p, s)| format!("{} {:.2} s ({:.0} %)", p.name(), s, 100.0 * s / total.max(1e-300)))
            .collect::<Vec<_>>()
            .join(", ")
    }
}

/// Label of the step schedule.
#[derive(ScheduleLabel, Debug, Clone, PartialEq, Eq, Hash)]
pub struct Step;

/// Simulated time.
#[derive(Resource, Debug, Clone, PartialEq)]
pub struct Clock {
    /// Current time, s.
    pub time: f64,
    /// Length of the step being taken, s.
    pub dt: f64,
    /// Steps completed.
    pub step: u64,
    /// Time of the next snapshot, s.
    pub next_snapshot: f64,
    /// Snapshots written.
    pub snapshots: u64,
    /// End of the run, s.
    pub end: f64,
}

impl Clock {
    /// Whether the run has reached its end (to a relative 1e-12).
    pub fn done(&self) -> bool {
        self.time >= self.end * (1.0 - 1e-12)
    }

    /// Whether the step being taken ends the run (same tolerance as [`Clock::done`]).
    pub fn is_last_step(&self) -> bool {
        self.time + self.dt >= self.end * (1.0 - 1e-12)
    }
}

/// Times (s) at which a step must end besides snapshots: doses, the start and end of
/// interventions, scheduled parameter changes. Processes add theirs when they install; the list
/// is a function of the scenario, so a checkpoint need not save it. (The extra snapshot times of
/// [`crate::process::output::ExtraSnapshots`] are a list of the same kind.)
#[derive(Resource, Debug, Clone, Default)]
pub struct Breakpoints {
    times: Vec<f64>,
}

impl Breakpoints {
    /// Adds a time (s); times at or before 0 are ignored.
    pub fn add(&mut self, t: f64) {
        if t > 0.0 && t.is_finite() {
            let i = self.times.partition_point(|&x| x < t);
            if self.times.get(i) != Some(&t) {
                self.times.insert(i, t);
            }
        }
    }

    /// The first breakpoint after `time` (beyond rounding), if any.
    pub fn next_after(&self, time: f64) -> Option<f64> {
        let eps = 1e-9 * time.abs().max(1.0);
        let i = self.times.partition_point(|&x| x <= time + eps);
        self.times.get(i).copied()
    }

    /// The breakpoint within rounding (a relative 1e-9) of `time`, if any.
    pub fn near(&self, time: f64) -> Option<f64> {
        let tol = |x: f64| 1e-9 * x.max(1.0);
        let i = self.times.partition_point(|&x| x < time - tol(time));
        self.times.get(i).copied().filter(|&b| (time - b).abs() <= tol(b))
    }

    /// All breakpoints, s, increasing.
    pub fn times(&self) -> &[f64] {
        &self.times
    }
}

/// The run's seed, from which every random stream is derived.
#[derive(Resource, Debug, Clone, Copy, PartialEq, Eq)]
pub struct Seed(pub u64);

/// Names of the particle species of the run, in species order.
#[derive(Resource, Debug, Clone, Default)]
pub struct SpeciesNames(pub Vec<String>);

/// Errors raised by systems; the driver stops the run at the first one.
#[derive(Resource, Debug, Default)]
pub struct Faults(pub Vec<SimError>);

/// Options of a run that are not part of the scenario (they do not change results).
#[derive(Debug, Clone)]
pub struct RunOptions {
    /// Folder of the run file.
    pub out_dir: std::path::PathBuf,
    /// Worker threads (0: all cores). Results do not depend on it.
    pub threads: usize,
    /// No progress output at all.
    pub quiet: bool,
    /// Continue from the run's checkpoint when there is one (otherwise start afresh).
    pub resume: bool,
}

/// What a finished run reports.
#[derive(Debug, Clone)]
pub struct RunSummary {
    pub file: std::path::PathBuf,
    pub steps: u64,
    pub snapshots: u64,
    pub wall_time_s: f64,
    /// Time spent in each process set over the steps of this invocation.
    pub phase_times: PhaseTimes,
}

/// A run: its world and its step schedule.
pub struct Simulation {
    pub world: World,
    pub schedule: Schedule,
    pub params: Params,
}

impl Simulation {
    /// Builds the world of a scenario: terrain, entities and process resources.
    pub fn new(loaded: &LoadedScenario) -> SimResult<Self> {
        let mut params = Params::resolve_loaded(loaded);
        let mut world = World::new();
        world.insert_resource(params.lattice.clone());
        // Terrain: regions, matrix, cells, network; grown first when the scenario asks.
        crate::terrain::build(&mut world, &mut params)?;
        world.insert_resource(params.run.clone());
        world.insert_resource(params.tumour.clone());
        world.insert_resource(params.matrix.clone());
        world.insert_resource(params.output.clone());
        world.insert_resource(Seed(params.run.seed));
        init_task_pool();
        world.insert_resource(Faults::default());
        world.insert_resource(Breakpoints::default());
        world.insert_resource(Clock {
            time: 0.0,
            dt: params.run.time_step,
            step: 0,
            next_snapshot: 0.0,
            snapshots: 0,
            end: params.run.end_time,
        });

        let mut schedule = Schedule::new(Step);
        // Processes run one after another in the order of the physics; each parallelises inside.
        schedule.set_executor(bevy_ecs::schedule::SingleThreadedExecutor::new());
        for pair in Phase::ALL.windows(2) {
            schedule.configure_sets(pair[0].before(pair[1]));
        }
        process::install(&mut world, &mut schedule, &params)?;
        schedule.add_systems(advance_clock.in_set(Phase::Advance));
        // A lap of the process timer before the first set and after each one.
        world.insert_resource(PhaseTimes::default());
        schedule.add_systems((|mut t: ResMut<PhaseTimes>| t.start()).before(Phase::Blood));
        for (k, &set) in Phase::ALL.iter().enumerate() {
            let lap = (move |mut t: ResMut<PhaseTimes>| t.lap(k)).after(set);
            match Phase::ALL.get(k + 1) {
                Some(&next) => schedule.add_systems(lap.before(next)),
                None => schedule.add_systems(lap),
            };
        }
        Ok(Simulation { world, schedule, params })
    }

    /// The lattice of the run.
    pub fn lattice(&self) -> &Lattice {
        self.world.resource::<Lattice>()
    }

    /// Runs one step; returns the first fault a system raised.
    pub fn step(&mut self) -> SimResult<()> {
        {
            let next_break = self.world.resource::<Breakpoints>().next_after(self.world.resource::<Clock>().time);
            let mut clock = self.world.resource_mut::<Clock>();
            let target = clock.next_snapshot.min(clock.end).min(next_break.unwrap_or(f64::INFINITY));
            let remaining = target - clock.time;
            let base = self.params.run.time_step;
            // Land exactly on snapshot times and breakpoints; avoid a sliver of a step just before one.
            clock.dt = if remaining <= base * (1.0 + 1e-9) { remaining.max(0.0) } else { base.min(remaining) };
        }
        self.schedule.run(&mut self.world);
        let mut faults = self.world.resource_mut::<Faults>();
        if let Some(e) = faults.0.drain(..).next() {
            return Err(e);
        }
        Ok(())
    }

    /// Runs to the end: opens the run file (or, resuming, restores the checkpoint and reopens
    /// the file cut back to it), writes the initial snapshot, steps, writes checkpoints at their
    /// interval, closes the file. A finished run removes its checkpoint.
    pub fn run(&mut self, loaded: &LoadedScenario, opts: &RunOptions) -> SimResult<RunSummary> {
        let started = Instant::now();
        let threads = if opts.threads == 0 { rayon::current_num_threads() } else { opts.threads };
        let path = opts.out_dir.join(format!("{}.h5", self.params.run.name));
        let ckpt = crate::checkpoint::path_for(&path);
        let fp = crate::checkpoint::fingerprint(&loaded.text);
        let resuming = opts.resume && ckpt.exists() && path.exists();
        let file = if resuming {
            let keep = crate::checkpoint::read(&mut self.world, &ckpt, &fp)?;
            process::output::reopen_run_file(self, &path, keep)?
        } else {
            process::output::open_run_file(self, loaded, opts, threads)?
        };
        let end = self.params.run.end_time;
        let interval = self.params.run.checkpoint_interval;
        let mut last_checkpoint = if resuming { self.world.resource::<Clock>().time } else { 0.0 };
        let mut progress = Progress::new(end, opts.quiet);
        let result = (|| -> SimResult<()> {
            if !resuming {
                process::output::write_snapshot(&mut self.world)?;
            }
            while !self.world.resource::<Clock>().done() {
                let before = self.world.resource::<Clock>().snapshots;
                self.step()?;
                let c = self.world.resource::<Clock>();
                let (time, snaps, done) = (c.time, c.snapshots, c.done());
                progress.update(c.time, c.step, c.snapshots);
                if interval > 0.0 && snaps > before && !done && time >= last_checkpoint + interval * (1.0 - 1e-9) {
                    crate::checkpoint::write(&mut self.world, &ckpt, &fp)?;
                    last_checkpoint = time;
                }
            }
            Ok(())
        })();
        let wall = started.elapsed().as_secs_f64();
        progress.finish(result.is_ok());
        let status = match &result {
            Ok(()) => "finished".to_string(),
            Err(e) => format!("failed: {e}"),
        };
        let snapshots = self.world.resource::<Clock>().snapshots;
        let steps = self.world.resource::<Clock>().step;
        process::output::close_run_file(&mut self.world, &status, wall)?;
        result?;
        if ckpt.exists() {
            std::fs::remove_file(&ckpt).map_err(crate::error::SimError::io(&ckpt, "cannot remove the checkpoint"))?;
        }
        let phase_times = self.world.resource::<PhaseTimes>().clone();
        Ok(RunSummary { file, steps, snapshots, wall_time_s: wall, phase_times })
    }
}

/// Moves the clock by the step just taken.
pub fn advance_clock(mut clock: ResMut<Clock>, breaks: Res<Breakpoints>) {
    clock.time += clock.dt;
    clock.step += 1;
    // Snap to the snapshot time or a breakpoint when within rounding of it.
    if (clock.time - clock.next_snapshot).abs() <= 1e-9 * clock.next_snapshot.max(1.0) {
        clock.time = clock.next_snapshot;
    }
    if let Some(b) = breaks.near(clock.time) {
        clock.time = b;
    }
    if (clock.time - clock.end).abs() <= 1e-9 * clock.end.max(1.0) {
        clock.time = clock.end;
    }
}

/// Starts the ECS compute pool with as many threads as rayon's pool, once per process.
/// Per-entity work is written so that results do not depend on the thread count.
pub fn init_task_pool() {
    bevy_tasks::ComputeTaskPool::get_or_init(|| {
        bevy_tasks::TaskPoolBuilder::new().num_threads(rayon::current_num_threads()).build()
    });
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn phase_times_report_every_set_in_order_and_leave_out_the_idle_ones() {
        let t = PhaseTimes { seconds: [0.0, 0.25, 0.001, 1.0, 0.75, 0.0, 0.0, 0.0], ..Default::default() };
        assert_eq!(t.summary(), "pressure 0.25 s (12 %), transport 1.00 s (50 %), binding 0.75 s (37 %)");
        assert_eq!(
            t.record(),
            "blood=0.000 pressure=0.250 exchange=0.001 transport=1.000 binding=0.750 interventions=0.000 \
             advance=0.000 output=0.000"
        );
    }
}
