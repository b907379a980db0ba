//! `interstice sweep` on this machine, end to end: the local runner (resume, interrupted and
//! failed runs, retry), thread-count independence of the aggregate table, the HDF5 table, the
//! Morris indices of an engine sweep against SALib (`tests/python/check_sensitivity.py`), the
//! planning command, a dry-run job script, and typed errors on bad input.

mod common;

use std::path::Path;
use std::process::{Command, Output};

use common::{bin, root};

fn sweep(args: &[&str]) -> Output {
    Command::new(bin()).arg("sweep").args(args).current_dir(root()).output().expect("binary runs")
}

fn ok(args: &[&str]) -> String {
    let out = sweep(args);
    let text = format!("{}{}", String::from_utf8_lossy(&out.stdout), String::from_utf8_lossy(&out.stderr));
    assert!(out.status.success(), "interstice sweep {args:?} failed:\n{text}");
    text
}

fn fails(args: &[&str]) -> String {
    let out = sweep(args);
    let text = format!("{}{}", String::from_utf8_lossy(&out.stdout), String::from_utf8_lossy(&out.stderr));
    assert!(!out.status.success(), "interstice sweep {args:?} succeeded:\n{text}");
    assert!(!text.contains("panicked"), "{text}");
    text
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

fn host() -> String {
    std::fs::read_to_string("/proc/sys/kernel/hostname").unwrap().trim().to_string()
}

#[test]
fn local_runner_resumes_retries_and_gives_the_same_table_for_any_threads() {
    let tmp = tempfile::tempdir().unwrap();
    let a = tmp.path().join("a");
    let out = ok(&["run", "configs/sweep-sizes.toml", "--out", s(&a), "-J", "2", "-j", "1"]);
    assert!(out.contains("6 executed now (6 finished, 0 failed)"), "{out}");
    // Finished runs are skipped.
    let out = ok(&["run", "configs/sweep-sizes.toml", "--out", s(&a), "-J", "2"]);
    assert!(out.contains("0 runs to do, 6 finished already"), "{out}");

    // A run whose process died (status still "running", its process gone) is interrupted,
    // and the next runner executes it again.
    let run4 = a.join("runs/000004");
    std::fs::write(
        run4.join("status.toml"),
        format!("state = \"running\"\nattempt = 1\nhost = \"{}\"\npid = 4194303\nthreads = 1\nresumed = false\nstarted_unix_s = 0.0\n", host()),
    )
    .unwrap();
    let out = ok(&["collect", s(&a)]);
    assert!(
        out.contains("5 finished") && out.contains("1 interrupted") && out.contains("run 4 interrupted: attempt 1"),
        "{out}"
    );
    let out = ok(&["run", s(&a)]);
    assert!(out.contains("1 executed now (1 finished"), "{out}");
    let st = std::fs::read_to_string(run4.join("status.toml")).unwrap();
    assert!(st.contains("state = \"finished\"") && st.contains("attempt = 2"), "{st}");

    // A run that fails (its scenario broken behind the sweep's back) is listed with its error.
    let run2 = a.join("runs/000002");
    std::fs::write(run2.join("scenario.toml"), "[run]\nend_time_h = -1.0\n").unwrap();
    std::fs::remove_file(run2.join("status.toml")).unwrap();
    let out = fails(&["run", s(&a)]);
    assert!(
        out.contains("run 2 failed: ") && out.contains("run.end_time_h") && out.contains("1 of 6 runs failed"),
        "{out}"
    );
    let out = ok(&["collect", s(&a)]);
    assert!(out.contains("1 failed") && out.contains("run 2 failed: "), "{out}");
    // Preparing from the sweep file restores the scenario; the failed run is skipped until asked.
    let out = ok(&["run", "configs/sweep-sizes.toml", "--out", s(&a)]);
    assert!(out.contains("failed before and not run again") && out.contains("run 2: "), "{out}");
    let out = ok(&["run", "configs/sweep-sizes.toml", "--out", s(&a), "--retry-failed"]);
    assert!(out.contains("1 executed now (1 finished, 0 failed)"), "{out}");
    ok(&["aggregate", s(&a)]);

    // Another folder, other thread counts: the same table, byte for byte.
    let b = tmp.path().join("b");
    ok(&["run", "configs/sweep-sizes.toml", "--out", s(&b), "-J", "1", "-j", "2", "-q"]);
    ok(&["aggregate", s(&b)]);
    let ta = std::fs::read_to_string(a.join("aggregate/table.csv")).unwrap();
    let tb = std::fs::read_to_string(b.join("aggregate/table.csv")).unwrap();
    assert_eq!(ta, tb);
    let header = ta.lines().next().unwrap();
    assert!(
        header.starts_with("run,state,seed,particle[0].hydrodynamic_radius_nm,particle[0].ligand.kon_per_M_s,"),
        "{header}"
    );
    assert!(header.contains(",cancer_cells,") && header.contains(",np:tumour_percent_id,"), "{header}");
    assert_eq!(ta.lines().count(), 7);
    assert!(ta.lines().skip(1).all(|l| l.split(',').nth(1) == Some("finished")));
    // The HDF5 table holds the same columns, with units.
    let f = hdf5::File::open(a.join("aggregate/table.h5")).unwrap();
    let r: Vec<f64> = f.dataset("table/particle[0].hydrodynamic_radius_nm").unwrap().read_raw().unwrap();
    assert_eq!(r, vec![20.0, 20.0, 50.0, 50.0, 100.0, 100.0]);
    let cells: Vec<f64> = f.dataset("table/cancer_cells").unwrap().read_raw().unwrap();
    let csv_cells: Vec<f64> = {
        let col = header.split(',').position(|c| c == "cancer_cells").unwrap();
        ta.lines().skip(1).map(|l| l.split(',').nth(col).unwrap().parse().unwrap()).collect()
    };
    assert_eq!(cells, csv_cells);
    // A folder of another sweep is refused.
    let e = fails(&["run", "configs/sweep-morris.toml", "--out", s(&a)]);
    assert!(e.contains("this folder holds another sweep"), "{e}");
}

#[test]
fn morris_engine_sweep_matches_salib() {
    let tmp = tempfile::tempdir().unwrap();
    let m = tmp.path().join("m");
    ok(&["run", "configs/sweep-morris.toml", "--out", s(&m), "-J", "2", "-q"]);
    let out = ok(&["aggregate", s(&m)]);
    assert!(out.contains("cancer_cells mu_star tumour.radius_um"), "{out}");
    let agg = m.join("aggregate");
    let py = common::python(
        "check_sensitivity.py",
        &[
            s(&agg.join("table.csv")),
            s(&agg.join("sensitivity.csv")),
            "--method",
            "morris",
            "--params",
            "tumour.radius_um,cells.tumour_cell_fraction,particle[0].hydrodynamic_radius_nm",
            "--output",
            "cancer_cells",
            "--levels",
            "4",
            "--resamples",
            "4000",
        ],
    );
    eprintln!("{py}");
    assert!(py.contains("0 differed"), "{py}");
}

#[test]
fn plan_dry_run_script_and_typed_errors() {
    let out = ok(&["plan", "configs/sweep-sizes.toml"]);
    assert!(out.contains("grid design, 2 parameters, 6 runs"), "{out}");
    assert!(out.contains("from a probe of run 0") && out.contains("Slurm requests per task"), "{out}");
    assert!(out.contains("every run's scenario passed the engine's validation"), "{out}");
    let out = ok(&["plan", "configs/sweep-sobol.toml", "--no-probe"]);
    assert!(out.contains("saltelli design, 2 parameters, 64 runs") && out.contains("not estimated"), "{out}");

    // A dry run writes the job array script without Slurm.
    let tmp = tempfile::tempdir().unwrap();
    let d = tmp.path().join("d");
    let out = ok(&[
        "submit",
        "configs/sweep-sizes.toml",
        "--out",
        s(&d),
        "--dry-run",
        "--throttle",
        "2",
        "--cpus-per-task",
        "2",
    ]);
    assert!(out.contains("dry run: 6 runs (0-5) not submitted"), "{out}");
    let script = std::fs::read_to_string(d.join("slurm/array-000.sh")).unwrap();
    for want in
        ["#SBATCH --array=0-5%2\n", "#SBATCH --time=00:05:00\n", "#SBATCH --mem=256M\n", "#SBATCH --cpus-per-task=2\n"]
    {
        assert!(script.contains(want), "{want:?} missing from\n{script}");
    }
    assert!(
        script.contains(&format!("sweep task '{}' --offset 0 --threads \"${{SLURM_CPUS_PER_TASK:-2}}\"", d.display())),
        "{script}"
    );
    let out = ok(&["submit", s(&d), "--dry-run", "--time", "1:00:00", "--mem", "1G", "--runs", "1,3-4"]);
    assert!(out.contains("dry run: 3 runs (1,3-4) not submitted"), "{out}");
    let script = std::fs::read_to_string(d.join("slurm/array-001.sh")).unwrap();
    assert!(
        script.contains("--array=1,3-4\n") && script.contains("--time=1:00:00\n") && script.contains("--mem=1G\n"),
        "{script}"
    );

    // Bad input: typed errors with the file, line and key, never a panic.
    let bad = tmp.path().join("bad.toml");
    let base = root().join("configs/sweep-base.toml");
    std::fs::write(
        &bad,
        format!("[sweep]\nname = \"bad\"\nscenario = \"{}\"\ndesign = \"latin-hypercube\"\nsamples = 4\n\n[[parameter]]\nkey = \"matrix.tumour_porosity\"\nmin = 0.2\nmax = 1.5\n", base.display()),
    )
    .unwrap();
    let e = fails(&["plan", s(&bad)]);
    assert!(e.contains("bad.toml:10: `parameter[0].max` = 1.5: expected a finite number in (0, 1]"), "{e}");
    std::fs::write(&bad, format!("[sweep]\nname = \"bad\"\nscenario = \"{}\"\ndesign = \"list\"\n\n[[parameter]]\nkey = \"tumour.radius_um\"\nvalues = [90.0, 200.0]\n", base.display())).unwrap();
    let e = fails(&["run", s(&bad), "--out", s(&tmp.path().join("x"))]);
    assert!(
        e.contains("run 1 (tumour.radius_um = 200.0): its scenario is not valid") && e.contains("caused by:"),
        "{e}"
    );
    let e = fails(&["task", s(&d)]);
    assert!(e.contains("SLURM_ARRAY_TASK_ID"), "{e}");
    let e = fails(&["collect", s(tmp.path())]);
    assert!(e.contains("not a sweep folder"), "{e}");
    let e = fails(&["run", "configs/sweep-sizes.toml", "--out", s(&d), "-J", "0"]);
    assert!(e.contains("option `jobs` = 0"), "{e}");
    // A run executed by the task command, as a Slurm task would.
    let out = ok(&["task", s(&d), "--index", "5"]);
    assert!(out.contains("run 5 finished"), "{out}");
    let out = ok(&["task", s(&d), "--index", "5"]);
    assert!(out.contains("run 5 is finished already"), "{out}");
}
