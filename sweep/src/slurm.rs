//! Slurm: a sweep as a job array. Slurm is the distributed engine; this module only writes the
//! job script, calls `sbatch`, and reads `squeue` to tell queued runs from missing ones.
//!
//! Each array task runs `interstice sweep task <folder>`, which executes run
//! `SLURM_ARRAY_TASK_ID + offset` as a child `interstice run` and records its state in the
//! run's status file. Resubmission is a new array over just the chosen indices.
//!
//! `slurm/submissions.csv` records every submission: `submission, job_id, offset, indices,
//! time, mem, cpus_per_task, submitted_unix_s`.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};

use crate::error::{Result, SweepError};
use crate::estimate::Estimate;
use crate::folder::{Folder, RunState, now_s, write_atomic};

/// Options of a submission.
#[derive(Debug, Clone)]
pub struct SubmitOptions {
    /// Most tasks running at once (`%throttle`).
    pub throttle: Option<usize>,
    /// `--time` (Slurm syntax); default from the estimate.
    pub time: Option<String>,
    /// `--mem` (Slurm syntax, e.g. `2G`); default from the estimate.
    pub mem: Option<String>,
    /// CPUs per task (the run's threads).
    pub cpus_per_task: usize,
    pub partition: Option<String>,
    /// More `sbatch` arguments, passed as they are.
    pub extra: Vec<String>,
    /// Only these runs.
    pub only: Option<Vec<usize>>,
    /// Also resubmit failed runs.
    pub retry_failed: bool,
    /// Write the script but do not submit.
    pub dry_run: bool,
    /// The `interstice` binary the tasks run (on a cluster: a path every node can read).
    pub binary: PathBuf,
    /// Factor on the estimated time and memory of the longest run.
    pub safety: f64,
}

/// What a submission did.
#[derive(Debug, Clone, Default)]
pub struct SubmitReport {
    /// Run indices submitted.
    pub indices: Vec<usize>,
    /// Job scripts written.
    pub scripts: Vec<PathBuf>,
    /// Array job ids (empty for a dry run).
    pub job_ids: Vec<String>,
    /// The `--time` and `--mem` requested.
    pub time: String,
    pub mem: String,
    /// Runs left out: finished, queued, or failed without `--retry-failed`.
    pub finished: usize,
    pub queued: Vec<usize>,
    pub failed_skipped: Vec<(usize, String)>,
}

/// Compresses sorted indices into Slurm's array syntax: `0-3,7,9-11`.
pub fn array_spec(indices: &[usize]) -> String {
    let mut parts = Vec::new();
    let mut i = 0;
    while i < indices.len() {
        let start = indices[i];
        let mut end = start;
        while i + 1 < indices.len() && indices[i + 1] == end + 1 {
            i += 1;
            end = indices[i];
        }
        parts.push(if start == end { start.to_string() } else { format!("{start}-{end}") });
        i += 1;
    }
    parts.join(",")
}

/// Parses `0-3,7` back into indices.
pub fn parse_indices(spec: &str) -> Option<Vec<usize>> {
    let mut out = Vec::new();
    for part in spec.split(',').map(str::trim).filter(|p| !p.is_empty()) {
        match part.split_once('-') {
            Some((a, b)) => {
                let (a, b): (usize, usize) = (a.trim().parse().ok()?, b.trim().parse().ok()?);
                if b < a {
                    return None;
                }
                out.extend(a..=b);
            }
            None => out.push(part.parse().ok()?),
        }
    }
    Some(out)
}

/// Slurm's `--time` for `s` seconds, rounded up to whole minutes: `[D-]HH:MM:00`.
pub fn slurm_time(s: f64) -> String {
    let min = (s / 60.0).ceil().max(1.0) as u64;
    let (d, h, m) = (min / 1440, (min % 1440) / 60, min % 60);
    if d > 0 { format!("{d}-{h:02}:{m:02}:00") } else { format!("{h:02}:{m:02}:00") }
}

/// Slurm's `--mem` for `bytes`, rounded up to 64 MiB: `NNNM`.
pub fn slurm_mem(bytes: f64) -> String {
    let mib = (bytes / (1024.0 * 1024.0) / 64.0).ceil().max(1.0) as u64 * 64;
    format!("{mib}M")
}

/// The requests for the longest run: `safety` times its estimate plus two minutes (at least
/// five minutes), and `safety` times its memory (at least 256 MiB).
pub fn requests(est: &Estimate, safety: f64) -> (String, String) {
    let t = (est.max_s() * safety + 120.0).max(300.0);
    let m = (est.max_memory() * safety).max(256.0 * 1024.0 * 1024.0);
    (slurm_time(t), slurm_mem(m))
}

fn run_cmd(cmd: &str, args: &[String]) -> Result<String> {
    let out = Command::new(cmd).args(args).stdin(Stdio::null()).output().map_err(|e| SweepError::Slurm {
        what: format!("cannot run `{cmd}` ({e}): is Slurm installed here, and SLURM_CONF set? (scripts/slurm-local start for a one-node cluster)"),
    })?;
    if !out.status.success() {
        return Err(SweepError::Slurm {
            what: format!("`{cmd} {}` failed: {}", args.join(" "), String::from_utf8_lossy(&out.stderr).trim()),
        });
    }
    Ok(String::from_utf8_lossy(&out.stdout).into_owned())
}

/// Slurm's `MaxArraySize` (1001 when it cannot be read: Slurm's default).
pub fn max_array_size() -> usize {
    run_cmd("scontrol", &["show".into(), "config".into()])
        .ok()
        .and_then(|t| {
            t.lines().find_map(|l| {
                let (k, v) = l.split_once('=')?;
                (k.trim() == "MaxArraySize").then(|| v.trim().parse().ok()).flatten()
            })
        })
        .unwrap_or(1001)
}

/// One recorded submission.
#[derive(Debug, Clone, PartialEq)]
pub struct Submission {
    pub job_id: String,
    pub offset: usize,
    pub indices: Vec<usize>,
}

/// The submissions recorded in a sweep folder.
pub fn submissions(folder: &Folder) -> Vec<Submission> {
    let path = folder.root.join("slurm").join("submissions.csv");
    let Ok(t) = std::fs::read_to_string(path) else { return Vec::new() };
    t.lines()
        .skip(1)
        .filter_map(|l| {
            let f: Vec<&str> = l.split(',').collect();
            let indices = parse_indices(f.get(3)?.replace(';', ",").as_str())?;
            Some(Submission { job_id: f.get(1)?.to_string(), offset: f.get(2)?.parse().ok()?, indices })
        })
        .collect()
}

/// Tasks of a sweep's array jobs still known to Slurm: `<job>_<task>` -> state.
#[derive(Debug, Clone, Default)]
pub struct Queue {
    /// Whether `squeue` answered.
    pub available: bool,
    /// `<array job id>_<task id>` -> Slurm state (PENDING, RUNNING, COMPLETING...).
    pub tasks: BTreeMap<String, String>,
    /// Run index -> Slurm state, for the tasks above.
    pub runs: BTreeMap<usize, String>,
}

impl Queue {
    /// Whether a task id (`<job>_<task>`) is queued or running; `None` when Slurm did not answer.
    pub fn has(&self, id: &str) -> Option<bool> {
        self.available.then(|| self.tasks.contains_key(id))
    }
}

/// Asks `squeue` about the array jobs of a sweep.
pub fn queue(folder: &Folder) -> Queue {
    let subs = submissions(folder);
    if subs.is_empty() {
        return Queue { available: true, ..Queue::default() };
    }
    let ids: Vec<String> = subs.iter().map(|s| s.job_id.clone()).collect();
    let args = vec!["-h".into(), "-r".into(), "-j".into(), ids.join(","), "-o".into(), "%F|%K|%T".into()];
    let text = match run_cmd("squeue", &args) {
        Ok(t) => t,
        // Slurm forgets finished jobs; asking about only forgotten ones is an error.
        Err(SweepError::Slurm { what }) if what.contains("Invalid job id") => String::new(),
        Err(_) => return Queue::default(),
    };
    let mut q = Queue { available: true, ..Queue::default() };
    for line in text.lines() {
        let f: Vec<&str> = line.trim().split('|').collect();
        if f.len() < 3 {
            continue;
        }
        let Some(sub) = subs.iter().find(|s| s.job_id == f[0]) else { continue };
        let Some(tasks) = parse_indices(f[1].split('%').next().unwrap_or("")) else { continue };
        for t in tasks {
            q.tasks.insert(format!("{}_{t}", f[0]), f[2].to_string());
            q.runs.insert(t + sub.offset, f[2].to_string());
        }
    }
    q
}

/// Where each run stands on a cluster.
#[derive(Debug, Clone, PartialEq)]
pub enum Standing {
    /// In the queue, not started yet.
    Queued,
    /// Submitted, never started, and no longer in the queue (cancelled while pending, lost).
    Missing,
    /// Its own state from its files.
    State(RunState),
}

impl Standing {
    /// One word.
    pub fn word(&self) -> &'static str {
        match self {
            Standing::Queued => "queued",
            Standing::Missing => "missing",
            Standing::State(s) => s.word(),
        }
    }
}

/// The standing of every run of a sweep.
pub fn standings(folder: &Folder, q: &Queue) -> Vec<Standing> {
    let subs = submissions(folder);
    let mut submitted = vec![false; folder.len()];
    for s in &subs {
        for &i in &s.indices {
            if i < submitted.len() {
                submitted[i] = true;
            }
        }
    }
    (0..folder.len())
        .map(|i| {
            let st = folder.state(i, &|id| q.has(id));
            match st {
                RunState::Pending if q.runs.contains_key(&i) => Standing::Queued,
                RunState::Pending if submitted[i] && q.available => Standing::Missing,
                RunState::Pending if submitted[i] => Standing::Queued,
                other => Standing::State(other),
            }
        })
        .collect()
}

fn shell_quote(s: &str) -> String {
    format!("'{}'", s.replace('\'', "'\\''"))
}

/// The job script of one array.
#[allow(clippy::too_many_arguments)]
pub fn job_script(
    folder: &Folder,
    array: &str,
    offset: usize,
    time: &str,
    mem: &str,
    opts: &SubmitOptions,
    log_dir: &Path,
) -> String {
    let name = format!("interstice-{}", folder.plan.spec.name);
    let mut s = String::from("#!/bin/bash\n");
    s.push_str(&format!(
        "# Job array of sweep `{}` ({} runs), written by `interstice sweep submit`.\n",
        folder.plan.spec.name,
        folder.len()
    ));
    s.push_str("# Each task runs one run of the sweep: run index = SLURM_ARRAY_TASK_ID + offset.\n");
    s.push_str(&format!("#SBATCH --job-name={name}\n"));
    let throttle = opts.throttle.map(|t| format!("%{t}")).unwrap_or_default();
    s.push_str(&format!("#SBATCH --array={array}{throttle}\n"));
    s.push_str(&format!("#SBATCH --time={time}\n"));
    s.push_str(&format!("#SBATCH --mem={mem}\n"));
    s.push_str("#SBATCH --ntasks=1\n");
    s.push_str(&format!("#SBATCH --cpus-per-task={}\n", opts.cpus_per_task));
    s.push_str(&format!("#SBATCH --output={}/%A_%a.out\n", log_dir.display()));
    if let Some(p) = &opts.partition {
        s.push_str(&format!("#SBATCH --partition={p}\n"));
    }
    s.push_str(&format!(
        "exec {} sweep task {} --offset {offset} --threads \"${{SLURM_CPUS_PER_TASK:-{}}}\"\n",
        shell_quote(&opts.binary.display().to_string()),
        shell_quote(&folder.root.display().to_string()),
        opts.cpus_per_task
    ));
    s
}

/// Submits the runs of a sweep that are not finished (and not queued or running), as one job
/// array (several when the indices exceed Slurm's `MaxArraySize`).
pub fn submit(folder: &Folder, opts: &SubmitOptions, est: Option<&Estimate>) -> Result<SubmitReport> {
    if opts.cpus_per_task == 0 {
        return Err(SweepError::option("cpus-per-task", 0, "at least 1"));
    }
    if opts.throttle == Some(0) {
        return Err(SweepError::option("throttle", 0, "at least 1 task at a time"));
    }
    let n = folder.len();
    if let Some(bad) = opts.only.as_ref().and_then(|v| v.iter().find(|&&i| i >= n)) {
        return Err(SweepError::option("runs", bad, format!("run indices in [0, {}]", n - 1)));
    }
    let q = if opts.dry_run { Queue { available: false, ..Queue::default() } } else { queue(folder) };
    let st = standings(folder, &q);
    let mut report = SubmitReport::default();
    let wanted: Vec<usize> = opts.only.clone().unwrap_or_else(|| (0..n).collect());
    for i in wanted {
        match &st[i] {
            Standing::State(RunState::Finished) => report.finished += 1,
            Standing::Queued | Standing::State(RunState::Running) => report.queued.push(i),
            Standing::State(RunState::Failed(e)) if !opts.retry_failed && opts.only.is_none() => {
                report.failed_skipped.push((i, e.clone()));
            }
            _ => report.indices.push(i),
        }
    }
    report.indices.sort_unstable();
    report.indices.dedup();
    let (time, mem) = match (&opts.time, &opts.mem, est) {
        (Some(t), Some(m), _) => (t.clone(), m.clone()),
        (t, m, Some(e)) if e.probe.is_some() => {
            let (rt, rm) = requests(e, opts.safety);
            (t.clone().unwrap_or(rt), m.clone().unwrap_or(rm))
        }
        _ => {
            return Err(SweepError::option(
                "time/mem",
                "not given",
                "--time and --mem, or an estimate from the probe of run 0",
            ));
        }
    };
    report.time = time.clone();
    report.mem = mem.clone();
    if report.indices.is_empty() {
        return Ok(report);
    }
    let slurm_dir = folder.root.join("slurm");
    let log_dir = slurm_dir.join("logs");
    std::fs::create_dir_all(&log_dir).map_err(SweepError::io(&log_dir, "cannot create the folder"))?;
    let max = if opts.dry_run { 1001 } else { max_array_size() };
    // Arrays whose task ids stay below MaxArraySize: each chunk starts at its offset.
    let mut chunks: Vec<(usize, Vec<usize>)> = Vec::new();
    for &i in &report.indices {
        match chunks.last_mut() {
            Some((off, v)) if i - *off < max => v.push(i),
            _ => {
                let off = if chunks.is_empty() && i < max { 0 } else { i };
                chunks.push((off, vec![i]));
            }
        }
    }
    let subs_path = slurm_dir.join("submissions.csv");
    let mut record = std::fs::read_to_string(&subs_path)
        .unwrap_or_else(|_| "submission,job_id,offset,indices,time,mem,cpus_per_task,submitted_unix_s\n".into());
    // Scripts are numbered on: array-000.sh, array-001.sh... (dry runs included).
    let mut k = std::fs::read_dir(&slurm_dir)
        .map(|rd| rd.flatten().filter(|e| e.file_name().to_string_lossy().starts_with("array-")).count())
        .unwrap_or(0);
    for (offset, idx) in chunks {
        let local: Vec<usize> = idx.iter().map(|i| i - offset).collect();
        let array = array_spec(&local);
        let script = slurm_dir.join(format!("array-{k:03}.sh"));
        write_atomic(&script, job_script(folder, &array, offset, &time, &mem, opts, &log_dir).as_bytes())?;
        report.scripts.push(script.clone());
        if opts.dry_run {
            k += 1;
            continue;
        }
        let mut args = vec!["--parsable".to_string()];
        args.extend(opts.extra.iter().cloned());
        args.push(script.display().to_string());
        let out = run_cmd("sbatch", &args)?;
        let job = out.trim().split(';').next().unwrap_or("").trim().to_string();
        if job.is_empty() || !job.chars().all(|c| c.is_ascii_digit()) {
            return Err(SweepError::Slurm { what: format!("sbatch answered {out:?}, not a job id") });
        }
        record.push_str(&format!(
            "{k},{job},{offset},{},{time},{mem},{},{:.3}\n",
            array_spec(&idx).replace(',', ";"),
            opts.cpus_per_task,
            now_s()
        ));
        // Recorded at once: a later chunk that fails still leaves this one known.
        write_atomic(&subs_path, record.as_bytes())?;
        report.job_ids.push(job);
        k += 1;
    }
    Ok(report)
}

/// The run index of this Slurm array task: `SLURM_ARRAY_TASK_ID + offset`.
pub fn task_index(offset: usize) -> Result<usize> {
    let id = std::env::var("SLURM_ARRAY_TASK_ID").map_err(|_| {
        SweepError::option("index", "not given", "--index N, or SLURM_ARRAY_TASK_ID set by a Slurm job array")
    })?;
    let i: usize = id.trim().parse().map_err(|_| SweepError::option("SLURM_ARRAY_TASK_ID", &id, "a whole number"))?;
    Ok(i + offset)
}

/// `<array job>_<task>` of this task, when Slurm set them.
pub fn task_job_id() -> Option<String> {
    let j = std::env::var("SLURM_ARRAY_JOB_ID").ok()?;
    let t = std::env::var("SLURM_ARRAY_TASK_ID").ok()?;
    Some(format!("{j}_{t}"))
}
