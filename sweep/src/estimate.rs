//! The cost of a sweep before anything is spent: counts from each run's scenario (voxels, steps,
//! snapshots) and, optionally, a probe of run 0 in this process: its world is built, a few steps
//! are timed (no run file), and one and two snapshots are written to scratch files to measure
//! their size and time. Each run's cost is then scaled from run 0 by its voxels, steps and
//! snapshots. The probe times the first steps only: runs whose later steps cost more (more
//! particles in the tissue) take longer, hence the safety factor of the Slurm requests.

use std::path::PathBuf;
use std::time::Instant;

use interstice_sim::scenario::Scenario;
use interstice_sim::{RunOptions, Simulation};

use crate::error::{Result, SweepError};
use crate::plan::Plan;

/// The size of one run, from its scenario.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RunSize {
    pub voxels: f64,
    pub steps: f64,
    pub snapshots: f64,
}

/// What the probe of run 0 measured.
#[derive(Debug, Clone, PartialEq)]
pub struct Probe {
    pub threads: usize,
    /// Steps timed.
    pub steps: u64,
    /// Time to build the world, s.
    pub build_s: f64,
    /// Time per step, s.
    pub step_s: f64,
    /// Time to write one snapshot, s.
    pub snapshot_s: f64,
    /// Bytes of a run file with no snapshot (metadata, mesh).
    pub fixed_bytes: f64,
    /// Bytes per snapshot.
    pub snapshot_bytes: f64,
    /// Resident memory the world took, bytes.
    pub memory_bytes: f64,
}

/// The cost of a sweep.
#[derive(Debug, Clone)]
pub struct Estimate {
    pub sizes: Vec<RunSize>,
    pub probe: Option<Probe>,
    /// Wall time of each run at `probe.threads` threads, s (with a probe).
    pub run_s: Vec<f64>,
    /// Disk of each run, bytes (with a probe).
    pub run_bytes: Vec<f64>,
    /// Memory of each run, bytes (with a probe).
    pub run_memory: Vec<f64>,
}

/// Memory of an `interstice` process before its world is built (binary, libraries, HDF5), bytes:
/// a rounded figure measured on Linux, common practice for a margin.
pub const BASE_MEMORY_BYTES: f64 = 64.0 * 1024.0 * 1024.0;

fn size_of(s: &Scenario) -> RunSize {
    let voxels: f64 = s.lattice.shape.iter().map(|&n| n as f64).product();
    let end = s.run.end_time_h * 3600.0;
    let interval = s.run.snapshot_interval_h * 3600.0;
    let snaps = (end / interval * (1.0 - 1e-12)).floor() + 1.0 + 1.0;
    // Steps of the base length, plus the shortened steps that land on snapshot times.
    let steps = (end / s.run.time_step_s).ceil() + snaps - 1.0;
    RunSize { voxels, steps, snapshots: snaps }
}

fn rss_bytes() -> f64 {
    let s = std::fs::read_to_string("/proc/self/status").unwrap_or_default();
    s.lines()
        .find_map(|l| l.strip_prefix("VmRSS:"))
        .and_then(|v| v.trim().trim_end_matches("kB").trim().parse::<f64>().ok())
        .map_or(0.0, |kb| kb * 1024.0)
}

fn dir_bytes(dir: &std::path::Path) -> f64 {
    std::fs::read_dir(dir)
        .map(|rd| rd.flatten().filter_map(|e| e.metadata().ok()).map(|m| m.len() as f64).sum())
        .unwrap_or(0.0)
}

fn scratch(tag: &str) -> PathBuf {
    std::env::temp_dir().join(format!("interstice-probe-{}-{tag}", std::process::id()))
}

/// Builds run 0, times up to `max_steps` steps (at most about `max_s` seconds), and writes one
/// and two snapshots to scratch files.
pub fn probe(plan: &Plan, threads: usize, max_steps: u64, max_s: f64) -> Result<Probe> {
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .map_err(|e| SweepError::option("threads", threads, format!("a thread count this machine can start ({e})")))?;
    let loaded = plan.loaded(0, std::path::Path::new("runs/000000/scenario.toml"))?;
    pool.install(|| -> Result<Probe> {
        let sim_err = |e: interstice_sim::SimError| SweepError::RunFailed { index: 0, what: format!("probe: {e}") };
        let rss0 = rss_bytes();
        let t0 = Instant::now();
        let mut sim = Simulation::new(&loaded).map_err(sim_err)?;
        let build_s = t0.elapsed().as_secs_f64();
        let t1 = Instant::now();
        let mut steps = 0;
        while steps < max_steps && t1.elapsed().as_secs_f64() < max_s {
            sim.step().map_err(sim_err)?;
            steps += 1;
            if sim.world.resource::<interstice_sim::world::Clock>().done() {
                break;
            }
        }
        let step_s = t1.elapsed().as_secs_f64() / steps.max(1) as f64;
        let memory_bytes = (rss_bytes() - rss0).max(0.0);
        let mut sizes = [0.0; 2];
        let mut snap_s = 0.0;
        for (k, snaps) in [1usize, 2].into_iter().enumerate() {
            let dir = scratch(&k.to_string());
            let _ = std::fs::remove_dir_all(&dir);
            std::fs::create_dir_all(&dir).map_err(SweepError::io(&dir, "cannot create a scratch folder"))?;
            let opts = RunOptions { out_dir: dir.clone(), threads, quiet: true, resume: false };
            let r = (|| -> interstice_sim::SimResult<f64> {
                interstice_sim::process::output::open_run_file(&mut sim, &loaded, &opts, threads)?;
                let t = Instant::now();
                for _ in 0..snaps {
                    interstice_sim::process::output::write_snapshot(&mut sim.world)?;
                }
                let dt = t.elapsed().as_secs_f64();
                interstice_sim::process::output::close_run_file(&mut sim.world, "probe", 0.0)?;
                Ok(dt)
            })();
            sizes[k] = dir_bytes(&dir);
            let _ = std::fs::remove_dir_all(&dir);
            let dt = r.map_err(sim_err)?;
            if snaps == 2 {
                snap_s = dt / 2.0;
            }
        }
        let snapshot_bytes = (sizes[1] - sizes[0]).max(0.0);
        Ok(Probe {
            threads,
            steps,
            build_s,
            step_s,
            snapshot_s: snap_s,
            fixed_bytes: (sizes[0] - snapshot_bytes).max(0.0),
            snapshot_bytes,
            memory_bytes,
        })
    })
}

/// The sizes of every run and, with a probe, their time, disk and memory.
pub fn estimate(plan: &Plan, probe: Option<Probe>) -> Result<Estimate> {
    let mut sizes = Vec::with_capacity(plan.runs.len());
    for i in 0..plan.runs.len() {
        let s: Scenario = toml::from_str(&plan.scenario_text(i))
            .map_err(|e| SweepError::RunFailed { index: i, what: format!("its scenario does not parse: {e}") })?;
        sizes.push(size_of(&s));
    }
    let (mut run_s, mut run_bytes, mut run_memory) = (Vec::new(), Vec::new(), Vec::new());
    if let Some(p) = &probe {
        let s0 = sizes[0];
        for s in &sizes {
            let v = s.voxels / s0.voxels;
            run_s.push(v * (p.build_s + s.steps * p.step_s + s.snapshots * p.snapshot_s));
            run_bytes.push(p.fixed_bytes * v + s.snapshots * p.snapshot_bytes * v);
            run_memory.push(BASE_MEMORY_BYTES + p.memory_bytes * v);
        }
    }
    Ok(Estimate { sizes, probe, run_s, run_bytes, run_memory })
}

/// A duration for people: `12.0 ms`, `42 s`, `3.5 min`, `2.1 h`, `3.2 d`.
pub fn human_s(s: f64) -> String {
    if s < 1.0 {
        format!("{:.1} ms", s * 1e3)
    } else if s < 120.0 {
        format!("{s:.1} s")
    } else if s < 7200.0 {
        format!("{:.1} min", s / 60.0)
    } else if s < 172_800.0 {
        format!("{:.1} h", s / 3600.0)
    } else {
        format!("{:.1} d", s / 86400.0)
    }
}

/// A size for people: `512 B`, `1.2 MB`, `3.4 GB` (powers of 1000).
pub fn human_bytes(b: f64) -> String {
    let units = ["B", "kB", "MB", "GB", "TB", "PB"];
    let mut x = b;
    let mut u = 0;
    while x >= 1000.0 && u + 1 < units.len() {
        x /= 1000.0;
        u += 1;
    }
    if u == 0 { format!("{x:.0} {}", units[u]) } else { format!("{x:.1} {}", units[u]) }
}

impl Estimate {
    /// Total CPU-side wall time of all runs one after another, s.
    pub fn total_s(&self) -> f64 {
        self.run_s.iter().sum()
    }

    /// Total disk, bytes.
    pub fn total_bytes(&self) -> f64 {
        self.run_bytes.iter().sum()
    }

    /// The longest run, s.
    pub fn max_s(&self) -> f64 {
        self.run_s.iter().copied().fold(0.0, f64::max)
    }

    /// The largest memory of a run, bytes.
    pub fn max_memory(&self) -> f64 {
        self.run_memory.iter().copied().fold(0.0, f64::max)
    }
}
