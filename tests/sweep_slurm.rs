//! A sweep as a Slurm job array on a real one-node Slurm cluster (Debian's slurm-wlm and
//! munge, started on this machine by `scripts/slurm-local start` and stopped at the end, even
//! on failure). One array task is cancelled with `scancel` while its run is executing; `collect`
//! must report it interrupted, a resubmission runs just that index, and the aggregated table
//! must equal that of the same sweep run locally.
//!
//! Where Slurm cannot run at all (packages missing, not root) the test says why and skips.

mod common;

use std::path::{Path, PathBuf};
use std::process::{Command, Output};
use std::time::{Duration, Instant};

use common::{bin, root};

struct Cluster {
    conf: PathBuf,
    started_here: bool,
}

impl Cluster {
    /// Starts the local cluster, or `Err(reason)` when Slurm cannot run on this machine.
    fn start() -> Result<Cluster, String> {
        let out = Command::new(root().join("scripts/slurm-local")).arg("start").output().expect("bash runs");
        let err = String::from_utf8_lossy(&out.stderr).to_string();
        if out.status.code() == Some(3) {
            return Err(err.trim().to_string());
        }
        assert!(out.status.success(), "scripts/slurm-local start failed:\n{err}");
        let line = String::from_utf8_lossy(&out.stdout).to_string();
        let conf = line.trim().strip_prefix("export SLURM_CONF=").expect("the export line").to_string();
        Ok(Cluster { conf: PathBuf::from(conf), started_here: !err.contains("already running") })
    }

    fn log_tail(&self) -> String {
        let dir = self.conf.parent().unwrap().join("log");
        let mut s = String::new();
        for f in ["slurmctld.log", "slurmd.log"] {
            let t = std::fs::read_to_string(dir.join(f)).unwrap_or_default();
            let lines: Vec<&str> = t.lines().collect();
            s.push_str(&format!("--- {f}\n{}\n", lines[lines.len().saturating_sub(15)..].join("\n")));
        }
        s
    }
}

impl Drop for Cluster {
    fn drop(&mut self) {
        if self.started_here {
            let _ = Command::new(root().join("scripts/slurm-local")).arg("stop").output();
        }
    }
}

fn run(cluster: &Cluster, prog: &Path, args: &[&str]) -> Output {
    Command::new(prog).args(args).env("SLURM_CONF", &cluster.conf).current_dir(root()).output().expect("program runs")
}

fn ok(cluster: &Cluster, args: &[&str]) -> String {
    let out = run(cluster, &bin(), args);
    let text = format!("{}{}", String::from_utf8_lossy(&out.stdout), String::from_utf8_lossy(&out.stderr));
    assert!(out.status.success(), "interstice {args:?} failed:\n{text}\n{}", cluster.log_tail());
    text
}

fn wait_for(cluster: &Cluster, what: &str, secs: u64, mut cond: impl FnMut() -> bool) {
    let t = Instant::now();
    while !cond() {
        assert!(
            t.elapsed() < Duration::from_secs(secs),
            "timed out after {secs} s waiting for {what}\n{}",
            cluster.log_tail()
        );
        std::thread::sleep(Duration::from_millis(50));
    }
}

fn queue_empty(cluster: &Cluster, job: &str) -> bool {
    let out = run(cluster, Path::new("squeue"), &["-h", "-r", "-j", job, "-o", "%i %T"]);
    let text = String::from_utf8_lossy(&out.stdout);
    text.trim().is_empty() || String::from_utf8_lossy(&out.stderr).contains("Invalid job id")
}

fn status(dir: &Path, i: usize) -> String {
    std::fs::read_to_string(dir.join(format!("runs/{i:06}/status.toml"))).unwrap_or_default()
}

fn job_id(submit_out: &str) -> String {
    let rest = submit_out.split("as job array ").nth(1).expect("a job id in the submit output");
    rest.split_whitespace().next().unwrap().trim_end_matches(',').to_string()
}

/// Simulated hours that make one run of the base scenario last about `target_s` seconds here,
/// from a timed run of 10 h (36000 steps of 1 s): the window in which a task is cancelled.
fn calibrated_hours(dir: &Path, target_s: f64) -> f64 {
    let base = std::fs::read_to_string(root().join("configs/sweep-base.toml")).unwrap();
    let probe = base
        .replace("time_step_s = 30.0", "time_step_s = 1.0")
        .replace("end_time_h = 0.16666666666666666", "end_time_h = 10.0")
        .replace("snapshot_interval_h = 0.08333333333333333", "snapshot_interval_h = 5.0");
    let p = dir.join("probe.toml");
    std::fs::write(&p, probe).unwrap();
    let t = Instant::now();
    common::interstice(&["run", p.to_str().unwrap(), "--out", dir.join("probe").to_str().unwrap(), "-q", "-j", "1"]);
    let wall = t.elapsed().as_secs_f64().max(1e-3);
    (10.0 * target_s / wall).clamp(1.0, 5000.0).round()
}

#[test]
fn slurm_job_array_with_a_cancelled_task_matches_the_local_sweep() {
    let cluster = match Cluster::start() {
        Ok(c) => c,
        Err(why) => {
            eprintln!("SKIPPED slurm_job_array_with_a_cancelled_task_matches_the_local_sweep: {why}");
            return;
        }
    };
    let tmp = tempfile::tempdir().unwrap();
    let hours = calibrated_hours(tmp.path(), 3.0);
    let base = std::fs::read_to_string(root().join("configs/sweep-base.toml"))
        .unwrap()
        .replace("time_step_s = 30.0", "time_step_s = 1.0")
        .replace("end_time_h = 0.16666666666666666", &format!("end_time_h = {hours:.1}"))
        .replace("snapshot_interval_h = 0.08333333333333333", &format!("snapshot_interval_h = {:.4}", hours / 4.0));
    std::fs::write(tmp.path().join("base.toml"), base).unwrap();
    let sweep = tmp.path().join("cluster.toml");
    std::fs::write(
        &sweep,
        "[sweep]\nname = \"cluster\"\nscenario = \"base.toml\"\ndesign = \"list\"\nseed = 31\n\n[[parameter]]\nkey = \"tumour.radius_um\"\nvalues = [70.0, 90.0, 100.0]\n",
    )
    .unwrap();
    let sweep = sweep.to_str().unwrap();

    // The reference: the same sweep on this machine.
    let local = tmp.path().join("local");
    ok(&cluster, &["sweep", "run", sweep, "--out", local.to_str().unwrap(), "-J", "2", "-q"]);
    ok(&cluster, &["sweep", "aggregate", local.to_str().unwrap()]);

    // The job array: requests from the plan's estimate, at most two tasks at once.
    let dir = tmp.path().join("slurm");
    let d = dir.to_str().unwrap();
    let out = ok(&cluster, &["sweep", "submit", sweep, "--out", d, "--throttle", "2"]);
    assert!(out.contains("submitted 3 runs (0-2) as job array"), "{out}");
    let job = job_id(&out);
    let script = std::fs::read_to_string(dir.join("slurm/array-000.sh")).unwrap();
    assert!(script.contains("#SBATCH --array=0-2%2\n") && script.contains("#SBATCH --time="), "{script}");

    // Cancel task 1 while its run executes (the task marked it running and its run file exists).
    let run_file = dir.join("runs/000001/cluster-000001.h5");
    wait_for(&cluster, "run 1 to be executing", 120, || {
        status(&dir, 1).contains("state = \"running\"") && run_file.exists()
    });
    assert!(!status(&dir, 1).contains("finished"), "run 1 finished before it could be cancelled: lengthen the runs");
    let out = run(&cluster, Path::new("scancel"), &[&format!("{job}_1")]);
    assert!(out.status.success(), "scancel: {}", String::from_utf8_lossy(&out.stderr));
    wait_for(&cluster, "the array to leave the queue", 180, || queue_empty(&cluster, &job));
    // Slurm ended the task's whole process tree: no `interstice run` of run 1 is left behind.
    let scen = dir.join("runs/000001/scenario.toml").display().to_string();
    wait_for(&cluster, "the cancelled run's processes to end", 30, || {
        std::fs::read_dir("/proc").unwrap().flatten().all(|e| {
            let cmd = std::fs::read(e.path().join("cmdline")).unwrap_or_default();
            !String::from_utf8_lossy(&cmd).contains(&scen)
        })
    });

    let out = ok(&cluster, &["sweep", "collect", d]);
    assert!(out.contains("2 finished") && out.contains("1 interrupted"), "{out}");
    assert!(out.contains(&format!("run 1 interrupted: attempt 1 (Slurm task {job}_1")), "{out}");

    // Resubmit: a new array over just the interrupted index.
    let out = ok(&cluster, &["sweep", "submit", d, "--time", "00:10:00", "--mem", "256M"]);
    assert!(out.contains("submitted 1 runs (1) as job array"), "{out}");
    let job2 = job_id(&out);
    assert!(std::fs::read_to_string(dir.join("slurm/array-001.sh")).unwrap().contains("#SBATCH --array=1\n"));
    wait_for(&cluster, "the resubmitted array to leave the queue", 180, || queue_empty(&cluster, &job2));
    let out = ok(&cluster, &["sweep", "collect", d]);
    assert!(out.contains("3 finished, 0 failed, 0 interrupted"), "{out}");
    let st = status(&dir, 1);
    assert!(st.contains("attempt = 2") && st.contains(&format!("slurm_job = \"{job2}_1\"")), "{st}");
    // Nothing left to submit.
    let out = ok(&cluster, &["sweep", "submit", d, "--time", "00:10:00", "--mem", "256M"]);
    assert!(out.contains("nothing to submit (3 finished"), "{out}");

    ok(&cluster, &["sweep", "aggregate", d]);
    let a = std::fs::read_to_string(local.join("aggregate/table.csv")).unwrap();
    let b = std::fs::read_to_string(dir.join("aggregate/table.csv")).unwrap();
    assert_eq!(a, b, "the Slurm sweep's table differs from the local one");
    eprintln!(
        "Slurm sweep: 3 runs of {hours} simulated hours, task {job}_1 cancelled and resubmitted as {job2}; table equal to the local one"
    );
}
