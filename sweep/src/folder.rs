//! The sweep folder: everything a sweep needs and produces, and each run's state read from files.
//!
//! ```text
//! <folder>/sweep.toml            the sweep file, as written
//! <folder>/scenario.toml         the base scenario, as written
//! <folder>/plan.csv              index, seed and parameters of every run
//! <folder>/runs/NNNNNN/scenario.toml   the run's scenario (checked by the engine)
//! <folder>/runs/NNNNNN/status.toml     running / finished / failed, written atomically
//! <folder>/runs/NNNNNN/log.txt         what the run printed (its errors)
//! <folder>/runs/NNNNNN/<name>-NNNNNN.h5  the run file (its `status` attribute)
//! <folder>/slurm/                job scripts, submissions.csv, task logs
//! <folder>/aggregate/            table.csv, table.h5, columns.csv, sensitivity.csv
//! ```
//!
//! A run's state is derived from its status file and its run file alone, so a runner, a Slurm
//! task or `collect` on another machine all read the same answer.

use std::io::Write as _;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, ExitStatus, Stdio};
use std::sync::OnceLock;
use std::time::{Instant, SystemTime, UNIX_EPOCH};

use serde::{Deserialize, Serialize};

use crate::error::{Result, SweepError};
use crate::plan::{Plan, run_dir_name};
use crate::spec::SweepSpec;

/// The flag of `interstice run` that resumes a run from the latest checkpoint in its output
/// folder (or starts it fresh when there is none). A re-attempted run gets it only when
/// `interstice run --help` lists it; without it a re-attempt starts from scratch, which gives the
/// same result because runs are deterministic.
pub const RESUME_FLAG: &str = "--resume";

/// What a run's status file holds.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Status {
    /// "running", "finished" or "failed".
    pub state: String,
    /// 1 for the first attempt, then one more each time the run is started again.
    pub attempt: u32,
    /// Host name of the machine executing it.
    pub host: String,
    /// Process supervising the run (the local runner or the Slurm task).
    pub pid: u32,
    /// The `interstice run` child process.
    pub child_pid: Option<u32>,
    /// `<array job>_<task>` when run by Slurm.
    pub slurm_job: Option<String>,
    /// Worker threads of the run.
    pub threads: usize,
    /// Whether this attempt was asked to resume from a checkpoint.
    pub resumed: bool,
    pub started_unix_s: f64,
    pub ended_unix_s: Option<f64>,
    pub wall_s: Option<f64>,
    /// How the child ended ("exit code 1", "killed by signal 9").
    pub exit: Option<String>,
    /// The run's error, for a failed run.
    pub error: Option<String>,
}

/// State of one run, derived from files.
#[derive(Debug, Clone, PartialEq)]
pub enum RunState {
    /// Never started.
    Pending,
    /// Being executed now (the supervising process or its Slurm task is alive).
    Running,
    /// Finished: status file and run file agree.
    Finished,
    /// Ended with an error.
    Failed(String),
    /// Started, but its process is gone without writing a result (killed, cancelled, node lost).
    Interrupted(String),
}

impl RunState {
    /// One word: pending, running, finished, failed, interrupted.
    pub fn word(&self) -> &'static str {
        match self {
            RunState::Pending => "pending",
            RunState::Running => "running",
            RunState::Finished => "finished",
            RunState::Failed(_) => "failed",
            RunState::Interrupted(_) => "interrupted",
        }
    }

    /// The error or reason, when there is one.
    pub fn reason(&self) -> Option<&str> {
        match self {
            RunState::Failed(e) | RunState::Interrupted(e) => Some(e),
            _ => None,
        }
    }
}

/// Seconds since the Unix epoch.
pub fn now_s() -> f64 {
    SystemTime::now().duration_since(UNIX_EPOCH).map(|d| d.as_secs_f64()).unwrap_or(0.0)
}

/// This machine's host name.
pub fn host_name() -> String {
    static HOST: OnceLock<String> = OnceLock::new();
    HOST.get_or_init(|| {
        std::fs::read_to_string("/proc/sys/kernel/hostname")
            .map(|s| s.trim().to_string())
            .ok()
            .filter(|s| !s.is_empty())
            .or_else(|| std::env::var("HOSTNAME").ok())
            .unwrap_or_else(|| "localhost".into())
    })
    .clone()
}

/// Whether process `pid` on this machine is alive and is an interstice process.
pub fn pid_alive(pid: u32) -> bool {
    match std::fs::read(format!("/proc/{pid}/cmdline")) {
        Ok(c) => {
            let stat = std::fs::read_to_string(format!("/proc/{pid}/stat")).unwrap_or_default();
            // A zombie has exited already.
            let zombie = stat.rsplit(')').next().is_some_and(|r| r.trim_start().starts_with('Z'));
            !zombie && String::from_utf8_lossy(&c).contains("interstice")
        }
        Err(_) => false,
    }
}

/// Writes `bytes` to `path` atomically (a temporary file beside it, then a rename).
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<()> {
    let tmp = path.with_extension(format!("tmp-{}", std::process::id()));
    let mut f = std::fs::File::create(&tmp).map_err(SweepError::io(&tmp, "cannot create the file"))?;
    f.write_all(bytes).map_err(SweepError::io(&tmp, "cannot write the file"))?;
    f.sync_all().map_err(SweepError::io(&tmp, "cannot write the file"))?;
    drop(f);
    std::fs::rename(&tmp, path).map_err(SweepError::io(path, "cannot put the file in place"))
}

fn read_text(path: &Path) -> Result<String> {
    std::fs::read_to_string(path).map_err(SweepError::io(path, "cannot read the file"))
}

fn mkdir(path: &Path) -> Result<()> {
    std::fs::create_dir_all(path).map_err(SweepError::io(path, "cannot create the folder"))
}

/// A prepared sweep folder and its plan.
#[derive(Debug)]
pub struct Folder {
    /// The folder (absolute).
    pub root: PathBuf,
    pub plan: Plan,
}

fn absolute(p: &Path) -> Result<PathBuf> {
    std::path::absolute(p).map_err(SweepError::io(p, "cannot resolve the path"))
}

fn plan_csv(plan: &Plan) -> String {
    let mut s = String::from("run,seed");
    for c in plan.columns() {
        s.push(',');
        s.push_str(&interstice_analysis::tables::text(&c));
    }
    s.push('\n');
    for r in &plan.runs {
        s.push_str(&format!("{},{}", r.index, r.seed));
        for v in &r.values {
            s.push(',');
            s.push_str(&crate::aggregate::cell(v));
        }
        s.push('\n');
    }
    s
}

impl Folder {
    /// Checks a sweep file, expands it and lays out (or re-uses) its folder. A folder that holds
    /// a different sweep is an error, so that finished runs are never mixed with another plan.
    pub fn prepare(sweep_file: &Path, root: &Path) -> Result<Folder> {
        Self::prepare_spec(SweepSpec::from_file(sweep_file)?, root)
    }

    /// [`Folder::prepare`] of a sweep already read.
    pub fn prepare_spec(spec: SweepSpec, root: &Path) -> Result<Folder> {
        let sweep_file = spec.file.clone();
        let sweep_file = sweep_file.as_path();
        let plan = Plan::new(spec)?;
        let root = absolute(root)?;
        let sweep_copy = root.join("sweep.toml");
        let scen_copy = root.join("scenario.toml");
        if sweep_copy.exists() {
            let old = read_text(&sweep_copy)?;
            let old_scen = read_text(&scen_copy).unwrap_or_default();
            if old != plan.spec.text || old_scen != plan.spec.scenario_text {
                let which = if old != plan.spec.text { "sweep file" } else { "base scenario" };
                return Err(SweepError::Folder {
                    path: root,
                    what: format!(
                        "this folder holds another sweep: its {which} differs from {}; use another output folder, or remove this one to start over",
                        if which == "sweep file" {
                            sweep_file.display().to_string()
                        } else {
                            plan.spec.scenario_path.display().to_string()
                        }
                    ),
                });
            }
        }
        mkdir(&root.join("runs"))?;
        if !sweep_copy.exists() {
            write_atomic(&scen_copy, plan.spec.scenario_text.as_bytes())?;
            write_atomic(&sweep_copy, plan.spec.text.as_bytes())?;
        }
        write_atomic(&root.join("plan.csv"), plan_csv(&plan).as_bytes())?;
        for i in 0..plan.runs.len() {
            let dir = Plan::run_dir(&root, i);
            mkdir(&dir)?;
            let f = dir.join("scenario.toml");
            let text = plan.scenario_text(i);
            if std::fs::read_to_string(&f).ok().as_deref() != Some(text.as_str()) {
                write_atomic(&f, text.as_bytes())?;
            }
        }
        Ok(Folder { root, plan })
    }

    /// Opens a prepared sweep folder (its own copies of the sweep file and base scenario).
    pub fn open(root: &Path) -> Result<Folder> {
        let root = absolute(root)?;
        let sweep_copy = root.join("sweep.toml");
        if !sweep_copy.exists() {
            return Err(SweepError::Folder {
                path: root,
                what: "not a sweep folder (no sweep.toml): prepare it with `interstice sweep run` or `interstice sweep submit`".into(),
            });
        }
        let text = read_text(&sweep_copy)?;
        let scen = root.join("scenario.toml");
        let scen_text = read_text(&scen)?;
        let spec = SweepSpec::from_text(&sweep_copy, text, Some((scen, scen_text)))?;
        let plan = Plan::new(spec)?;
        Ok(Folder { root, plan })
    }

    /// Number of runs.
    pub fn len(&self) -> usize {
        self.plan.runs.len()
    }

    /// Whether the sweep has no runs (never: a sweep has at least one).
    pub fn is_empty(&self) -> bool {
        self.plan.runs.is_empty()
    }

    /// Folder of run `i`.
    pub fn run_dir(&self, i: usize) -> PathBuf {
        Plan::run_dir(&self.root, i)
    }

    /// Run file of run `i`.
    pub fn run_file(&self, i: usize) -> PathBuf {
        self.run_dir(i).join(format!("{}.h5", self.plan.run_name(i)))
    }

    /// The state of run `i`. `queued` says whether a Slurm task id is still in the queue
    /// (`None`: unknown, for example without Slurm).
    pub fn state(&self, i: usize, queued: &dyn Fn(&str) -> Option<bool>) -> RunState {
        run_state(&self.run_dir(i), &self.run_file(i), queued)
    }
}

/// Reads a run's status file, if it has one.
pub fn read_status(run_dir: &Path) -> Option<Status> {
    let t = std::fs::read_to_string(run_dir.join("status.toml")).ok()?;
    toml::from_str(&t).ok()
}

/// Writes a run's status file atomically.
pub fn write_status(run_dir: &Path, s: &Status) -> Result<()> {
    let text = toml::to_string(s).unwrap_or_default();
    write_atomic(&run_dir.join("status.toml"), text.as_bytes())
}

/// The `status` root attribute and `finished_snapshots` of a run file.
pub fn run_file_status(path: &Path) -> Option<(String, u64)> {
    if !path.exists() {
        return None;
    }
    let f = hdf5::File::open(path).ok()?;
    let status = interstice_sim::io::read_string_attr(&f, "status").ok()?;
    let snaps = f.attr("finished_snapshots").ok().and_then(|a| a.read_scalar::<u64>().ok()).unwrap_or(0);
    Some((status, snaps))
}

/// The state of the run in `run_dir` with run file `run_file`.
pub fn run_state(run_dir: &Path, run_file: &Path, queued: &dyn Fn(&str) -> Option<bool>) -> RunState {
    let Some(st) = read_status(run_dir) else {
        if run_dir.join("status.toml").exists() {
            return RunState::Failed("its status file cannot be read".into());
        }
        return RunState::Pending;
    };
    match st.state.as_str() {
        "finished" => match run_file_status(run_file) {
            Some((s, _)) if s == "finished" => RunState::Finished,
            Some((s, _)) => {
                RunState::Failed(format!("the status file says finished but the run file's status is {s:?}"))
            }
            None => RunState::Failed(format!("the status file says finished but {} is missing", run_file.display())),
        },
        "failed" => RunState::Failed(st.error.unwrap_or_else(|| "failed (no error recorded)".into())),
        "running" => {
            let local = st.host == host_name();
            let alive = local && (pid_alive(st.pid) || st.child_pid.is_some_and(pid_alive));
            let in_queue = st.slurm_job.as_deref().and_then(queued);
            if alive || in_queue == Some(true) || (!local && st.slurm_job.is_some() && in_queue.is_none()) {
                return RunState::Running;
            }
            if !local && st.slurm_job.is_none() {
                // Started by a runner on another machine: only that machine can tell.
                return RunState::Running;
            }
            let file = match run_file_status(run_file) {
                Some((s, n)) => format!("the run file has {n} finished snapshots, status {s:?}"),
                None => "no run file".into(),
            };
            let who = match &st.slurm_job {
                Some(j) => format!("Slurm task {j} on {}", st.host),
                None => format!("process {} on {}", st.pid, st.host),
            };
            RunState::Interrupted(format!("attempt {} ({who}) ended without a result; {file}", st.attempt))
        }
        other => RunState::Failed(format!("unknown state {other:?} in its status file")),
    }
}

/// Whether `interstice run` of `binary` takes [`RESUME_FLAG`] (read from its `--help`, once).
pub fn resume_supported(binary: &Path) -> bool {
    static CACHE: OnceLock<std::sync::Mutex<Vec<(PathBuf, bool)>>> = OnceLock::new();
    let cache = CACHE.get_or_init(Default::default);
    if let Some((_, b)) = cache.lock().expect("cache").iter().find(|(p, _)| p == binary) {
        return *b;
    }
    let ok = Command::new(binary)
        .args(["run", "--help"])
        .stdin(Stdio::null())
        .output()
        .map(|o| String::from_utf8_lossy(&o.stdout).split_whitespace().any(|w| w.trim_end_matches(',') == RESUME_FLAG))
        .unwrap_or(false);
    cache.lock().expect("cache").push((binary.to_path_buf(), ok));
    ok
}

/// How to execute runs.
#[derive(Debug, Clone)]
pub struct Exec {
    /// The `interstice` binary.
    pub binary: PathBuf,
    /// Worker threads per run.
    pub threads: usize,
    /// `<array job>_<task>` when executed by a Slurm task.
    pub slurm_job: Option<String>,
}

/// A run being executed by a child `interstice run`.
pub struct Started {
    pub index: usize,
    pub child: Child,
    started: Instant,
    status: Status,
    run_dir: PathBuf,
    run_file: PathBuf,
}

/// Starts run `index`: marks it running, then spawns `interstice run` on its scenario.
pub fn start(folder_root: &Path, index: usize, run_file: &Path, exec: &Exec) -> Result<Started> {
    let run_dir = Plan::run_dir(folder_root, index);
    let scenario = run_dir.join("scenario.toml");
    if !scenario.exists() {
        return Err(SweepError::Folder {
            path: folder_root.to_path_buf(),
            what: format!("run {index} has no scenario ({}): prepare the folder again", scenario.display()),
        });
    }
    let previous = read_status(&run_dir);
    let attempt = previous.as_ref().map_or(1, |s| s.attempt + 1);
    let resume = attempt > 1 && resume_supported(&exec.binary);
    let log_path = run_dir.join("log.txt");
    let log = std::fs::File::create(&log_path).map_err(SweepError::io(&log_path, "cannot create the run log"))?;
    let mut status = Status {
        state: "running".into(),
        attempt,
        host: host_name(),
        pid: std::process::id(),
        child_pid: None,
        slurm_job: exec.slurm_job.clone(),
        threads: exec.threads,
        resumed: resume,
        started_unix_s: now_s(),
        ended_unix_s: None,
        wall_s: None,
        exit: None,
        error: None,
    };
    write_status(&run_dir, &status)?;
    let mut cmd = Command::new(&exec.binary);
    cmd.arg("run")
        .arg(&scenario)
        .arg("--out")
        .arg(&run_dir)
        .arg("--threads")
        .arg(exec.threads.to_string())
        .arg("--quiet");
    if resume {
        cmd.arg(RESUME_FLAG);
    }
    let log2 = log.try_clone().map_err(SweepError::io(&log_path, "cannot open the run log"))?;
    cmd.stdin(Stdio::null()).stdout(log).stderr(log2);
    let child = match cmd.spawn() {
        Ok(c) => c,
        Err(e) => {
            status.state = "failed".into();
            status.error = Some(format!("cannot start {}: {e}", exec.binary.display()));
            status.ended_unix_s = Some(now_s());
            write_status(&run_dir, &status)?;
            return Err(SweepError::RunFailed { index, what: status.error.unwrap_or_default() });
        }
    };
    status.child_pid = Some(child.id());
    write_status(&run_dir, &status)?;
    Ok(Started { index, child, started: Instant::now(), status, run_dir, run_file: run_file.to_path_buf() })
}

fn describe_exit(s: &ExitStatus) -> String {
    use std::os::unix::process::ExitStatusExt;
    match (s.code(), s.signal()) {
        (Some(c), _) => format!("exit code {c}"),
        (None, Some(sig)) => format!("killed by signal {sig}"),
        _ => "ended".into(),
    }
}

/// The error lines a failed run printed: its `error:` line and causes, or its last lines.
pub fn error_from_log(log: &str) -> String {
    let lines: Vec<&str> = log.lines().map(str::trim_end).filter(|l| !l.trim().is_empty()).collect();
    if let Some(i) = lines.iter().position(|l| l.starts_with("error:")) {
        let mut out = vec![lines[i].trim_start_matches("error:").trim().to_string()];
        out.extend(lines[i + 1..].iter().take_while(|l| l.starts_with(' ')).map(|l| l.trim().to_string()));
        return out.join("; ");
    }
    let n = lines.len();
    lines[n.saturating_sub(3)..].join("; ")
}

impl Started {
    /// Records how the child ended; returns the run's state.
    pub fn finish(mut self, exit: ExitStatus) -> Result<RunState> {
        let wall = self.started.elapsed().as_secs_f64();
        self.status.ended_unix_s = Some(now_s());
        self.status.wall_s = Some(wall);
        self.status.exit = Some(describe_exit(&exit));
        let file = run_file_status(&self.run_file);
        let state = if exit.success() && matches!(&file, Some((s, _)) if s == "finished") {
            self.status.state = "finished".into();
            RunState::Finished
        } else {
            let log = std::fs::read_to_string(self.run_dir.join("log.txt")).unwrap_or_default();
            let mut e = error_from_log(&log);
            if e.is_empty() {
                e = match &file {
                    Some((s, n)) => format!("{} ({n} snapshots, run file status {s:?})", describe_exit(&exit)),
                    None => format!("{} without a run file", describe_exit(&exit)),
                };
            } else if !exit.success() && exit.code().is_none() {
                e = format!("{}: {e}", describe_exit(&exit));
            }
            self.status.state = "failed".into();
            self.status.error = Some(e.clone());
            RunState::Failed(e)
        };
        write_status(&self.run_dir, &self.status)?;
        Ok(state)
    }

    /// Waits for the child and records how it ended.
    pub fn wait(mut self) -> Result<RunState> {
        let exit = self.child.wait().map_err(SweepError::io(&self.run_dir, "cannot wait for the run"))?;
        self.finish(exit)
    }
}

/// The run folder name of index `i` (re-exported for tests and scripts).
pub fn run_folder_name(i: usize) -> String {
    run_dir_name(i)
}
