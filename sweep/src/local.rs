//! The local runner: the runs of a sweep on this machine, a bounded number at a time, each a
//! child `interstice run` process (a crash of one run cannot take the runner down), with a
//! progress bar over runs. Finished runs are skipped; failed runs are listed with their error
//! and run again only when asked.

use std::io::IsTerminal;
use std::path::PathBuf;
use std::time::Duration;

use indicatif::{ProgressBar, ProgressStyle};

use crate::error::{Result, SweepError};
use crate::folder::{self, Exec, Folder, RunState, Started, host_name, pid_alive};

/// Options of the local runner.
#[derive(Debug, Clone)]
pub struct LocalOptions {
    /// Runs at once.
    pub concurrent: usize,
    /// Worker threads per run.
    pub threads: usize,
    /// Run failed runs again.
    pub retry_failed: bool,
    /// Only these runs (default: all).
    pub only: Option<Vec<usize>>,
    /// No progress output.
    pub quiet: bool,
    /// The `interstice` binary that runs each scenario.
    pub binary: PathBuf,
}

/// What a local sweep did.
#[derive(Debug, Clone, Default)]
pub struct LocalReport {
    /// Runs finished before this invocation (skipped).
    pub already_finished: usize,
    /// Runs executed now.
    pub executed: usize,
    /// Runs finished now.
    pub finished: usize,
    /// Runs that failed now, with their errors.
    pub failed: Vec<(usize, String)>,
    /// Runs that had failed before and were not run again, with their errors.
    pub skipped_failed: Vec<(usize, String)>,
    /// Runs being executed by another process (left alone).
    pub running_elsewhere: Vec<usize>,
}

/// Holds `runner.lock` in a sweep folder while a local runner uses it.
struct Lock(PathBuf);

impl Lock {
    fn take(folder: &Folder) -> Result<Lock> {
        let path = folder.root.join("runner.lock");
        if let Ok(t) = std::fs::read_to_string(&path) {
            let mut it = t.split_whitespace();
            let host = it.next().unwrap_or("");
            let pid: u32 = it.next().and_then(|p| p.parse().ok()).unwrap_or(0);
            if host == host_name() && pid != std::process::id() && pid_alive(pid) {
                return Err(SweepError::Folder {
                    path: folder.root.clone(),
                    what: format!("another runner (process {pid}) is using this sweep folder"),
                });
            }
        }
        folder::write_atomic(&path, format!("{} {}\n", host_name(), std::process::id()).as_bytes())?;
        Ok(Lock(path))
    }
}

impl Drop for Lock {
    fn drop(&mut self) {
        let _ = std::fs::remove_file(&self.0);
    }
}

fn bar(len: u64, quiet: bool) -> ProgressBar {
    if quiet || !std::io::stderr().is_terminal() {
        return ProgressBar::hidden();
    }
    let pb = ProgressBar::new(len);
    if let Ok(style) = ProgressStyle::with_template("{msg} [{bar:30}] {pos}/{len} runs ({elapsed}, eta {eta})") {
        pb.set_style(style.progress_chars("=> "));
    }
    pb
}

/// Runs the sweep in `folder` on this machine.
pub fn run(folder: &Folder, opts: &LocalOptions) -> Result<LocalReport> {
    if opts.concurrent == 0 {
        return Err(SweepError::option("jobs", 0, "at least 1 run at a time"));
    }
    if opts.threads == 0 {
        return Err(SweepError::option("threads", 0, "at least 1 thread per run"));
    }
    let _lock = Lock::take(folder)?;
    let n = folder.len();
    let selected: Vec<usize> = match &opts.only {
        Some(v) => {
            if let Some(&bad) = v.iter().find(|&&i| i >= n) {
                return Err(SweepError::option("runs", bad, format!("run indices in [0, {}]", n - 1)));
            }
            v.clone()
        }
        None => (0..n).collect(),
    };
    let mut report = LocalReport::default();
    let mut todo = Vec::new();
    for &i in &selected {
        match folder.state(i, &|_| None) {
            RunState::Finished => report.already_finished += 1,
            RunState::Failed(e) if !opts.retry_failed => report.skipped_failed.push((i, e)),
            RunState::Running => report.running_elsewhere.push(i),
            _ => todo.push(i),
        }
    }
    let pb = bar(todo.len() as u64, opts.quiet);
    let plain = !opts.quiet && pb.is_hidden();
    if !opts.quiet {
        let msg = format!(
            "sweep {}: {} runs to do, {} finished already, {} failed before{}",
            folder.plan.spec.name,
            todo.len(),
            report.already_finished,
            report.skipped_failed.len(),
            if report.skipped_failed.is_empty() || opts.retry_failed { "" } else { " (run again with --retry-failed)" }
        );
        pb.println(&msg);
        if pb.is_hidden() {
            eprintln!("{msg}");
        }
    }
    let exec = Exec { binary: opts.binary.clone(), threads: opts.threads, slurm_job: None };
    let mut queue = todo.into_iter();
    let mut running: Vec<Started> = Vec::new();
    loop {
        while running.len() < opts.concurrent {
            let Some(i) = queue.next() else { break };
            match folder::start(&folder.root, i, &folder.run_file(i), &exec) {
                Ok(s) => running.push(s),
                Err(SweepError::RunFailed { index, what }) => {
                    report.executed += 1;
                    report.failed.push((index, what));
                    pb.inc(1);
                }
                Err(e) => return Err(e),
            }
        }
        if running.is_empty() {
            break;
        }
        pb.set_message(format!("{} running, {} failed", running.len(), report.failed.len()));
        let mut k = 0;
        let mut progressed = false;
        while k < running.len() {
            let exit = running[k].child.try_wait().map_err(SweepError::io(&folder.root, "cannot poll a run"))?;
            if let Some(exit) = exit {
                let s = running.swap_remove(k);
                let i = s.index;
                let state = s.finish(exit)?;
                report.executed += 1;
                match state {
                    RunState::Finished => {
                        report.finished += 1;
                        if plain {
                            eprintln!("run {i} finished");
                        }
                    }
                    other => {
                        let e = other.reason().unwrap_or("failed").to_string();
                        pb.println(format!("run {i} failed: {e}"));
                        if plain {
                            eprintln!("run {i} failed: {e}");
                        }
                        report.failed.push((i, e));
                    }
                }
                pb.inc(1);
                progressed = true;
            } else {
                k += 1;
            }
        }
        if !progressed {
            std::thread::sleep(Duration::from_millis(50));
        }
    }
    pb.finish_and_clear();
    report.failed.sort_by_key(|f| f.0);
    Ok(report)
}
