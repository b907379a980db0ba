//! The `interstice sweep` subcommands: `plan`, `run`, `task`, `submit`, `collect`, `aggregate`.
//! The binary adds [`SweepCommand`] under `sweep` and calls [`main`].

use std::path::{Path, PathBuf};

use clap::Subcommand;
use interstice_analysis::cli::AnalysisArgs;

use crate::aggregate;
use crate::error::{Result, SweepError};
use crate::estimate::{self, Estimate, human_bytes, human_s};
use crate::folder::{self, Exec, Folder, RunState};
use crate::local::{self, LocalOptions};
use crate::slurm::{self, Standing, SubmitOptions, parse_indices};
use crate::spec::{SweepSpec, Values};

/// Sweeps: many runs of one base scenario, on this machine or as a Slurm job array.
#[derive(Subcommand, Debug)]
pub enum SweepCommand {
    /// Check a sweep file, list its runs and estimate their cost (time, disk, memory); writes nothing.
    Plan {
        /// Sweep file (TOML).
        sweep: PathBuf,
        /// Threads per run for the estimate.
        #[arg(short = 'j', long, default_value_t = 1)]
        threads: usize,
        /// Skip the probe of run 0 (no timing: counts only).
        #[arg(long)]
        no_probe: bool,
        /// Runs to list.
        #[arg(long, default_value_t = 10)]
        show: usize,
    },
    /// Run a sweep on this machine: a bounded number of child runs at a time, resumable.
    Run {
        /// Sweep file (TOML), or a sweep folder prepared before.
        sweep: PathBuf,
        /// Sweep folder (default: runs/<sweep name>).
        #[arg(short, long)]
        out: Option<PathBuf>,
        /// Runs at once.
        #[arg(short = 'J', long = "jobs", default_value_t = 1)]
        jobs: usize,
        /// Worker threads per run. Results do not depend on it.
        #[arg(short = 'j', long, default_value_t = 1)]
        threads: usize,
        /// Run failed runs again (finished runs are always skipped).
        #[arg(long)]
        retry_failed: bool,
        /// Only these runs, e.g. `0-3,7`.
        #[arg(long)]
        runs: Option<String>,
        /// No progress output.
        #[arg(short, long)]
        quiet: bool,
    },
    /// Execute one run of a sweep folder: what each Slurm array task runs.
    Task {
        /// Sweep folder.
        folder: PathBuf,
        /// Run index (default: SLURM_ARRAY_TASK_ID + offset).
        #[arg(long)]
        index: Option<usize>,
        /// Added to SLURM_ARRAY_TASK_ID.
        #[arg(long, default_value_t = 0)]
        offset: usize,
        /// Worker threads of the run.
        #[arg(short = 'j', long, default_value_t = 1)]
        threads: usize,
    },
    /// Write and submit a Slurm job array over the runs that are not finished (nor queued).
    Submit {
        /// Sweep file (TOML), or a sweep folder prepared before.
        sweep: PathBuf,
        /// Sweep folder (default: runs/<sweep name>); on a cluster, on a shared file system.
        #[arg(short, long)]
        out: Option<PathBuf>,
        /// Most array tasks running at once.
        #[arg(long)]
        throttle: Option<usize>,
        /// Time limit per task, Slurm syntax (default: from the estimate).
        #[arg(long)]
        time: Option<String>,
        /// Memory per task, Slurm syntax such as 2G (default: from the estimate).
        #[arg(long)]
        mem: Option<String>,
        /// CPUs per task: the threads of each run.
        #[arg(long, default_value_t = 1)]
        cpus_per_task: usize,
        /// Slurm partition.
        #[arg(long)]
        partition: Option<String>,
        /// More sbatch arguments (repeat), e.g. --sbatch-arg=--account=abc.
        #[arg(long = "sbatch-arg", allow_hyphen_values = true)]
        sbatch_args: Vec<String>,
        /// Only these runs, e.g. `0-3,7` (failed ones included).
        #[arg(long)]
        runs: Option<String>,
        /// Resubmit failed runs too.
        #[arg(long)]
        retry_failed: bool,
        /// Write the job script, do not submit.
        #[arg(long)]
        dry_run: bool,
        /// The interstice binary the tasks run (default: this one).
        #[arg(long)]
        binary: Option<PathBuf>,
        /// Factor on the estimated time and memory of the longest run.
        #[arg(long, default_value_t = 3.0)]
        safety: f64,
    },
    /// Which runs finished, failed, were interrupted, are queued or missing.
    Collect {
        /// Sweep folder.
        folder: PathBuf,
        /// List every run, finished ones too.
        #[arg(long)]
        all: bool,
    },
    /// One table of every run's parameters and metrics (CSV, HDF5) and the sensitivity indices.
    Aggregate {
        /// Sweep folder.
        folder: PathBuf,
        /// Folder of the tables (default: <sweep folder>/aggregate).
        #[arg(short, long)]
        out: Option<PathBuf>,
        /// Coverage threshold: internalised particles a cancer cell must exceed.
        #[arg(long, default_value_t = interstice_analysis::metrics::DEFAULT_THRESHOLD_PARTICLES, allow_negative_numbers = true)]
        threshold: f64,
        /// Tissue density for %ID per gram, g/mL.
        #[arg(long = "density-g-per-ml", default_value_t = interstice_analysis::metrics::DEFAULT_DENSITY_KG_PER_M3 / 1000.0, allow_negative_numbers = true)]
        density_g_per_ml: f64,
        /// Width of the penetration-profile bins, um (default: the voxel size).
        #[arg(long = "bin-um", allow_negative_numbers = true)]
        bin_um: Option<f64>,
    },
}

fn this_binary() -> Result<PathBuf> {
    std::env::current_exe().map_err(SweepError::io("interstice", "cannot find this program's path"))
}

fn runs_option(s: &Option<String>) -> Result<Option<Vec<usize>>> {
    match s {
        None => Ok(None),
        Some(t) => parse_indices(t)
            .filter(|v| !v.is_empty())
            .map(Some)
            .ok_or_else(|| SweepError::option("runs", t, "run indices such as 0-3,7")),
    }
}

/// Opens a sweep folder, or reads a sweep file and prepares its folder (`out`, by default
/// `runs/<name>`).
fn folder_of(sweep: &Path, out: Option<&Path>) -> Result<Folder> {
    if sweep.is_dir() {
        let f = Folder::open(sweep)?;
        if let Some(o) = out
            && std::path::absolute(o).ok().as_deref() != Some(f.root.as_path())
        {
            return Err(SweepError::option(
                "out",
                o.display(),
                format!("no --out with a sweep folder ({})", f.root.display()),
            ));
        }
        return Ok(f);
    }
    let spec = SweepSpec::from_file(sweep)?;
    let root = out.map_or_else(|| PathBuf::from("runs").join(&spec.name), Path::to_path_buf);
    Folder::prepare_spec(spec, &root)
}

fn print_estimate(est: &Estimate, jobs: usize) {
    let n = est.sizes.len();
    let vox = est.sizes.iter().map(|s| s.voxels).fold(0.0, f64::max);
    let steps: f64 = est.sizes.iter().map(|s| s.steps).sum();
    let snaps: f64 = est.sizes.iter().map(|s| s.snapshots).sum();
    println!("size: up to {vox:.0} voxels a run; {steps:.0} steps and {snaps:.0} snapshots in all");
    match &est.probe {
        None => println!("cost: not estimated (--no-probe)"),
        Some(p) => {
            println!(
                "cost, from a probe of run 0 in this process ({} thread{}): world built in {}, {} steps timed at {} each, snapshots {} and {} each; each run scaled by its voxels, steps and snapshots:",
                p.threads,
                if p.threads == 1 { "" } else { "s" },
                human_s(p.build_s),
                p.steps,
                human_s(p.step_s),
                human_bytes(p.snapshot_bytes),
                human_s(p.snapshot_s)
            );
            let min = est.run_s.iter().copied().fold(f64::INFINITY, f64::min);
            println!(
                "  per run: {} to {} wall, up to {} disk, up to {} memory",
                human_s(min),
                human_s(est.max_s()),
                human_bytes(est.run_bytes.iter().copied().fold(0.0, f64::max)),
                human_bytes(est.max_memory())
            );
            let total = est.total_s();
            println!(
                "  all {n} runs: {} of run time in all ({} with {jobs} at once on one machine), {} of disk",
                human_s(total),
                human_s(total / jobs.min(n).max(1) as f64),
                human_bytes(est.total_bytes())
            );
            let (t, m) = slurm::requests(est, 3.0);
            println!("  Slurm requests per task (submit's defaults, 3x the longest run): --time={t} --mem={m}");
            println!("  the probe times the first steps only: runs that get busier later take longer");
        }
    }
}

fn plan(sweep: &Path, threads: usize, no_probe: bool, show: usize) -> Result<()> {
    let spec = SweepSpec::from_file(sweep)?;
    let plan = crate::plan::Plan::new(spec)?;
    let s = &plan.spec;
    println!(
        "sweep {} ({}): {} design, {} parameter{}, {} runs; base scenario {}",
        s.name,
        sweep.display(),
        s.design.name(),
        s.parameters.len(),
        if s.parameters.len() == 1 { "" } else { "s" },
        plan.runs.len(),
        s.scenario_path.display()
    );
    match s.seeds {
        crate::spec::SeedMode::PerRun => println!("seeds: one per run, derived from {}", s.seed),
        crate::spec::SeedMode::Shared => println!("seeds: every run uses {}", s.seed),
    }
    for p in &s.parameters {
        match &p.values {
            Values::Listed(v) => println!(
                "  {}: {} values: {}",
                p.name(),
                v.len(),
                v.iter().map(|x| x.to_string()).collect::<Vec<_>>().join(", ")
            ),
            Values::Range { min, max, scale, .. } => {
                println!(
                    "  {}: {min} to {max} ({})",
                    p.name(),
                    if *scale == crate::spec::Scale::Log { "log" } else { "linear" }
                )
            }
        }
    }
    for i in 0..plan.runs.len().min(show) {
        println!("  run {i}: {}, seed {}", plan.describe(i), plan.runs[i].seed);
    }
    if plan.runs.len() > show {
        println!("  ... {} more (plan.csv in the sweep folder lists them all)", plan.runs.len() - show);
    }
    let probe = if no_probe { None } else { Some(estimate::probe(&plan, threads.max(1), 200, 2.0)?) };
    let est = estimate::estimate(&plan, probe)?;
    print_estimate(&est, 1);
    println!("every run's scenario passed the engine's validation");
    Ok(())
}

fn print_local(r: &local::LocalReport, folder: &Folder) {
    eprintln!(
        "sweep {}: {} executed now ({} finished, {} failed); {} finished before; folder {}",
        folder.plan.spec.name,
        r.executed,
        r.finished,
        r.failed.len(),
        r.already_finished,
        folder.root.display()
    );
    for (i, e) in &r.failed {
        eprintln!("  run {i} failed: {e}");
    }
    if !r.skipped_failed.is_empty() {
        eprintln!("failed before and not run again (add --retry-failed):");
        for (i, e) in &r.skipped_failed {
            eprintln!("  run {i}: {e}");
        }
    }
    if !r.running_elsewhere.is_empty() {
        eprintln!("running in another process, left alone: {}", slurm::array_spec(&r.running_elsewhere));
    }
}

fn collect(root: &Path, all: bool) -> Result<()> {
    let folder = Folder::open(root)?;
    let q = slurm::queue(&folder);
    let st = slurm::standings(&folder, &q);
    let mut counts: std::collections::BTreeMap<&str, usize> = Default::default();
    for s in &st {
        *counts.entry(s.word()).or_default() += 1;
    }
    let order = ["finished", "failed", "interrupted", "running", "queued", "missing", "pending"];
    let summary: Vec<String> = order.iter().map(|w| format!("{} {w}", counts.get(w).copied().unwrap_or(0))).collect();
    println!("sweep {}: {} runs: {}", folder.plan.spec.name, folder.len(), summary.join(", "));
    if !q.available {
        println!("note: squeue did not answer: runs submitted but not started are shown as queued");
    }
    for (i, s) in st.iter().enumerate() {
        let show = all || !matches!(s, Standing::State(RunState::Finished));
        if !show {
            continue;
        }
        match s {
            Standing::State(x) => match x.reason() {
                Some(r) => println!("run {i} {}: {r}", s.word()),
                None => println!("run {i} {}", s.word()),
            },
            _ => println!("run {i} {}", s.word()),
        }
    }
    let redo: Vec<usize> = st
        .iter()
        .enumerate()
        .filter(|(_, s)| {
            matches!(
                s,
                Standing::Missing | Standing::State(RunState::Interrupted(_)) | Standing::State(RunState::Pending)
            )
        })
        .map(|(i, _)| i)
        .collect();
    if !redo.is_empty() {
        println!(
            "to submit the interrupted, missing and pending runs again: interstice sweep submit {} (add --retry-failed for failed ones)",
            folder.root.display()
        );
    }
    Ok(())
}

fn task(root: &Path, index: Option<usize>, offset: usize, threads: usize) -> Result<()> {
    if threads == 0 {
        return Err(SweepError::option("threads", 0, "at least 1"));
    }
    let root = std::path::absolute(root).map_err(SweepError::io(root, "cannot resolve the path"))?;
    if !root.join("sweep.toml").exists() {
        return Err(SweepError::Folder { path: root, what: "not a sweep folder (no sweep.toml)".into() });
    }
    let i = match index {
        Some(i) => i,
        None => slurm::task_index(offset)?,
    };
    let run_dir = crate::plan::Plan::run_dir(&root, i);
    let scen = run_dir.join("scenario.toml");
    let text =
        std::fs::read_to_string(&scen).map_err(SweepError::io(&scen, format!("run {i} has no scenario here")))?;
    let name = toml::from_str::<toml::Table>(&text)
        .ok()
        .and_then(|t| t.get("run")?.get("name")?.as_str().map(str::to_string))
        .ok_or_else(|| SweepError::Folder {
            path: scen.clone(),
            what: "the run's scenario names no run.name".into(),
        })?;
    let run_file = run_dir.join(format!("{name}.h5"));
    if folder::run_state(&run_dir, &run_file, &|_| None) == RunState::Finished {
        eprintln!("interstice: run {i} is finished already");
        return Ok(());
    }
    let exec = Exec { binary: this_binary()?, threads, slurm_job: slurm::task_job_id() };
    let started = folder::start(&root, i, &run_file, &exec)?;
    match started.wait()? {
        RunState::Finished => {
            eprintln!("interstice: run {i} finished ({})", run_file.display());
            Ok(())
        }
        other => Err(SweepError::RunFailed { index: i, what: other.reason().unwrap_or("failed").to_string() }),
    }
}

/// Runs one `interstice sweep` subcommand.
pub fn main(cmd: SweepCommand) -> Result<()> {
    match cmd {
        SweepCommand::Plan { sweep, threads, no_probe, show } => plan(&sweep, threads, no_probe, show),
        SweepCommand::Run { sweep, out, jobs, threads, retry_failed, runs, quiet } => {
            let only = runs_option(&runs)?;
            let folder = folder_of(&sweep, out.as_deref())?;
            let opts = LocalOptions { concurrent: jobs, threads, retry_failed, only, quiet, binary: this_binary()? };
            let r = local::run(&folder, &opts)?;
            if !quiet {
                print_local(&r, &folder);
            }
            if !r.failed.is_empty() {
                return Err(SweepError::Incomplete {
                    what: format!(
                        "{} of {} runs failed: see `interstice sweep collect {}`",
                        r.failed.len(),
                        folder.len(),
                        folder.root.display()
                    ),
                });
            }
            Ok(())
        }
        SweepCommand::Task { folder, index, offset, threads } => task(&folder, index, offset, threads),
        SweepCommand::Submit {
            sweep,
            out,
            throttle,
            time,
            mem,
            cpus_per_task,
            partition,
            sbatch_args,
            runs,
            retry_failed,
            dry_run,
            binary,
            safety,
        } => {
            if !(safety.is_finite() && safety >= 1.0) {
                return Err(SweepError::option("safety", safety, "a number >= 1"));
            }
            let only = runs_option(&runs)?;
            let folder = folder_of(&sweep, out.as_deref())?;
            let est = if time.is_some() && mem.is_some() {
                None
            } else {
                let p = estimate::probe(&folder.plan, cpus_per_task.max(1), 200, 2.0)?;
                Some(estimate::estimate(&folder.plan, Some(p))?)
            };
            let binary = match binary {
                Some(b) => std::path::absolute(&b).map_err(SweepError::io(&b, "cannot resolve the path"))?,
                None => this_binary()?,
            };
            let opts = SubmitOptions {
                throttle,
                time,
                mem,
                cpus_per_task,
                partition,
                extra: sbatch_args,
                only,
                retry_failed,
                dry_run,
                binary,
                safety,
            };
            let r = slurm::submit(&folder, &opts, est.as_ref())?;
            if r.indices.is_empty() {
                println!(
                    "sweep {}: nothing to submit ({} finished, {} queued or running, {} failed: add --retry-failed)",
                    folder.plan.spec.name,
                    r.finished,
                    r.queued.len(),
                    r.failed_skipped.len()
                );
                return Ok(());
            }
            for s in &r.scripts {
                println!("job script: {}", s.display());
            }
            if dry_run {
                println!("dry run: {} runs ({}) not submitted", r.indices.len(), slurm::array_spec(&r.indices));
            } else {
                println!(
                    "submitted {} runs ({}) as job array {} with --time={} --mem={}",
                    r.indices.len(),
                    slurm::array_spec(&r.indices),
                    r.job_ids.join(", "),
                    r.time,
                    r.mem
                );
            }
            if !r.failed_skipped.is_empty() {
                println!(
                    "not resubmitted (failed; add --retry-failed): {}",
                    slurm::array_spec(&r.failed_skipped.iter().map(|f| f.0).collect::<Vec<_>>())
                );
            }
            Ok(())
        }
        SweepCommand::Collect { folder, all } => collect(&folder, all),
        SweepCommand::Aggregate { folder, out, threshold, density_g_per_ml, bin_um } => {
            let f = Folder::open(&folder)?;
            let args = AnalysisArgs { threshold, density_g_per_ml, bin_um, species: Vec::new(), quiet: true };
            let agg = aggregate::aggregate(&f, &args)?;
            let files = aggregate::write(&f, &agg, out.as_deref())?;
            let metrics = agg.columns.iter().filter(|c| c.kind == "metric").count();
            println!(
                "sweep {}: {} runs, {} parameter columns, {} metric columns",
                f.plan.spec.name,
                f.len(),
                f.plan.columns().len(),
                metrics
            );
            for r in agg.sensitivity.iter().filter(|r| matches!(r.index, "mu_star" | "S1" | "ST")) {
                println!(
                    "  {} {} {}{}: {} +- {}",
                    r.output,
                    r.index,
                    r.parameter,
                    if r.parameter2.is_empty() { String::new() } else { format!(" x {}", r.parameter2) },
                    interstice_analysis::tables::num(r.value),
                    interstice_analysis::tables::num(r.conf)
                );
            }
            for n in &agg.notes {
                println!("note: {n}");
            }
            for p in files {
                eprintln!("interstice: wrote {}", p.display());
            }
            Ok(())
        }
    }
}
