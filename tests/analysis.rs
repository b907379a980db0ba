//! End-to-end checks of the analysis subcommands: the metrics recomputed by an independent
//! Python script (h5py, NumPy, SciPy), the report and comparison pages loaded in headless
//! Chromium (Debian's package), the CLI on a real engine run and on bad input.

mod common;

use std::path::{Path, PathBuf};
use std::process::Command;

use common::*;
use interstice_analysis::synthetic::{self, Example};

// The analysis crate keeps its own copy of the caution; it must say the same as the engine.
#[test]
fn analysis_caution_is_the_engine_caution() {
    assert_eq!(interstice_analysis::CAUTION, interstice_sim::provenance::CAUTION);
}

fn example_file(dir: &Path, name: &str, e: &Example, killed: bool) -> PathBuf {
    let mut run = synthetic::example(e);
    if killed {
        // Killed while writing the last snapshot: its group exists but is not complete.
        run.status = "running".into();
        let last = run.snapshots.len() - 1;
        run.snapshots[last].complete = false;
        run.finished_snapshots = Some(last as u64);
    }
    let p = dir.join(format!("{name}.h5"));
    run.write(&p).unwrap();
    p
}

// Outside reference: tests/python/check_metrics.py recomputes every metric with h5py, NumPy and
// SciPy (cKDTree for depths, brute force over segments for vessel distances).
#[test]
fn metrics_agree_with_an_independent_python_recomputation() {
    let dir = tempfile::tempdir().unwrap();
    for (name, killed, threshold) in [("full", false, "1000"), ("killed", true, "150")] {
        let run = example_file(dir.path(), name, &Example::default(), killed);
        let out = dir.path().join(format!("{name}-tables"));
        let plots = dir.path().join(format!("{name}-plots"));
        let (r, o, p) = (run.to_str().unwrap(), out.to_str().unwrap(), plots.to_str().unwrap());
        interstice(&["metrics", r, "--out", o, "--threshold", threshold, "--density-g-per-ml", "1.05", "-q"]);
        interstice(&["plot", r, "--out", p, "--format", "svg", "-q"]);
        let text = python("check_metrics.py", &[r, o, "--threshold", threshold, "--density", "1.05", "--svg", p]);
        assert!(text.contains("all metrics agree"), "{text}");
    }
}

fn chromium() -> PathBuf {
    for c in ["chromium", "chromium-browser"] {
        if Command::new(c).arg("--version").output().is_ok_and(|o| o.status.success()) {
            return PathBuf::from(c);
        }
    }
    panic!("headless Chromium is needed for this test: scripts/setup --tests installs Debian's chromium");
}

fn chromium_args(profile: &Path) -> Vec<String> {
    [
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
    ]
    .iter()
    .map(|s| s.to_string())
    .chain([format!("--user-data-dir={}", profile.display())])
    .collect()
}

/// Loads `page` in headless Chromium: the DOM after load and a screenshot.
fn load_in_chromium(page: &Path, work: &Path) -> (String, Vec<u8>) {
    let url = format!("file://{}", page.canonicalize().unwrap().display());
    let dom = Command::new(chromium())
        .args(chromium_args(&work.join("profile-dom")))
        .args(["--virtual-time-budget=5000", "--dump-dom", &url])
        .output()
        .unwrap();
    assert!(dom.status.success(), "chromium --dump-dom failed: {}", String::from_utf8_lossy(&dom.stderr));
    let shot = work.join("shot.png");
    let out = Command::new(chromium())
        .args(chromium_args(&work.join("profile-shot")))
        .args([format!("--screenshot={}", shot.display()), "--window-size=1200,1600".into(), url])
        .output()
        .unwrap();
    assert!(out.status.success(), "chromium --screenshot failed: {}", String::from_utf8_lossy(&out.stderr));
    (String::from_utf8_lossy(&dom.stdout).into_owned(), std::fs::read(shot).unwrap())
}

/// (width, height, distinct colours, fraction of non-white pixels) of an RGB or RGBA PNG.
fn png_stats(bytes: &[u8]) -> (u32, u32, usize, f64) {
    let mut r = png::Decoder::new(std::io::Cursor::new(bytes)).read_info().unwrap();
    let mut buf = vec![0; r.output_buffer_size().unwrap()];
    let info = r.next_frame(&mut buf).unwrap();
    let ch = info.color_type.samples();
    let mut px: Vec<[u8; 3]> = buf[..info.buffer_size()].chunks(ch).map(|p| [p[0], p[1], p[2]]).collect();
    let ink = px.iter().filter(|p| p.iter().any(|&c| c < 240)).count() as f64 / px.len() as f64;
    px.sort();
    px.dedup();
    (info.width, info.height, px.len(), ink)
}

// Outside reference: Debian's Chromium renders the pages.
#[test]
fn report_and_comparison_load_in_headless_chromium() {
    let dir = tempfile::tempdir().unwrap();
    let a = example_file(dir.path(), "a", &Example { n: 16, ..Example::default() }, false);
    let b =
        example_file(dir.path(), "b", &Example { n: 16, dose_a: 3e10, name: "b".into(), ..Example::default() }, true);
    let report = dir.path().join("a-report.html");
    interstice(&["report", a.to_str().unwrap(), "-q"]);
    assert!(report.exists());
    let cmp = dir.path().join("cmp.html");
    interstice(&["compare", a.to_str().unwrap(), b.to_str().unwrap(), "--out", cmp.to_str().unwrap(), "-q"]);
    for page in [&report, &cmp] {
        let work = tempfile::tempdir().unwrap();
        let (dom, shot) = load_in_chromium(page, work.path());
        assert!(dom.contains("data-images-ok=\"yes\""), "{}: images did not load", page.display());
        assert!(dom.contains("data-errors=\"0\""), "{}: the page raised errors", page.display());
        assert!(dom.contains("research use only"), "{}: no caution", page.display());
        let (w, h, colours, ink) = png_stats(&shot);
        assert_eq!((w, h), (1200, 1600));
        assert!(
            colours > 50 && ink > 0.02,
            "{}: screenshot looks blank ({colours} colours, {ink} ink)",
            page.display()
        );
    }
}

#[test]
fn analysis_commands_work_on_an_engine_run_and_reject_bad_input_cleanly() {
    let dir = tempfile::tempdir().unwrap();
    let s = scenario(
        dir.path(),
        "tiny",
        "[run]\nname = \"tiny\"\nend_time_h = 0.5\ntime_step_s = 60.0\nsnapshot_interval_h = 0.25\n\
[lattice]\nshape = [16, 16, 16]\nvoxel_um = 20.0\n[tumour]\nradius_um = 100.0\n",
    );
    let out = dir.path().join("out");
    interstice(&["run", s.to_str().unwrap(), "--out", out.to_str().unwrap(), "-q"]);
    let run = out.join("tiny.h5");
    let r = run.to_str().unwrap();
    let o = interstice(&["metrics", r, "--out", out.join("tables").to_str().unwrap(), "-q"]);
    assert!(String::from_utf8_lossy(&o.stdout).contains("research use only"));
    interstice(&["report", r, "--out", out.join("tiny.html").to_str().unwrap(), "-q"]);
    let html = std::fs::read_to_string(out.join("tiny.html")).unwrap();
    assert!(html.contains("region") && html.contains("data:image/png;base64,"));
    interstice(&["plot", r, "--out", out.join("plots").to_str().unwrap(), "--field", "porosity", "--axis", "x", "-q"]);
    assert!(out.join("plots/slice_porosity_000002_x.png").exists());

    let fails = |args: &[&str], want: &str| {
        let o = Command::new(bin()).args(args).env("RUST_BACKTRACE", "1").output().unwrap();
        let err = String::from_utf8_lossy(&o.stderr);
        assert!(!o.status.success(), "{args:?} succeeded");
        assert!(err.contains(want), "{args:?}: {err}");
        assert!(!err.contains("panicked") && !err.contains("stack backtrace"), "{err}");
    };
    let scratch = dir.path().join("scratch");
    let sc = scratch.to_str().unwrap();
    let missing = dir.path().join("nope.h5");
    fails(&["report", missing.to_str().unwrap(), "--out", sc], "nope.h5: no such file");
    fails(&["metrics", s.to_str().unwrap(), "--out", sc], "tiny.toml: not an HDF5 file");
    fails(&["metrics", r, "--out", sc, "--threshold", "-5"], "bad value for threshold: -5");
    fails(&["metrics", r, "--out", sc, "--species", "zz"], "no particle species `zz`");
    fails(&["plot", r, "--out", sc, "--field", "pressure"], "has no field `pressure`");
    fails(&["plot", r, "--out", sc, "--snapshot", "9"], "no finished snapshot 9");
    assert!(!scratch.exists(), "a failed command wrote output");
}
