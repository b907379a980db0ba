//! Metrics, tables, plots and reports on small synthetic run files with known answers.
//! The source of each expected value is named beside its check.

use std::path::Path;

use indicatif::ProgressBar;
use interstice_analysis::metrics::{Reference, analyse};
use interstice_analysis::runfile::Lattice;
use interstice_analysis::synthetic::{self, Column, Example, Run, Snapshot};
use interstice_analysis::{AnalysisError, Options, RunFile, cli, plot, report, tables};

fn close(a: f64, b: f64, rel: f64) -> bool {
    (a - b).abs() <= rel * a.abs().max(b.abs()).max(1e-300)
}

/// A slab tumour (voxel column i < 5 of 10) with uniform free particles: c_t in the tumour,
/// c_h in the host, both growing linearly in time (0, 1, 2 units at t = 0, 100, 200 s).
fn slab_run(c_t: f64, c_h: f64, dose: f64) -> Run {
    let l = Lattice { shape_xyz: [10, 4, 3], voxel_size_m: 1e-5, origin_m: [0.0; 3] };
    let region: Vec<u8> = (0..l.len()).map(|v| u8::from(l.ijk(v)[0] < 5)).collect();
    let mut run = Run::new(l.clone(), "slab", &[("s", dose)]);
    for (i, t) in [0.0, 100.0, 200.0].into_iter().enumerate() {
        let g = i as f64;
        let free: Vec<f64> = region.iter().map(|&r| if r == 1 { c_t * g } else { c_h * g }).collect();
        run.snapshots.push(Snapshot {
            time_s: t,
            step: i as u64,
            complete: true,
            fields: vec![Column::u8("region", "1", region.clone()), Column::f64("free_s", "m-3", free)],
            cells: None,
            vessels: None,
        });
    }
    run
}

fn analysed(run: &Run, opts: &Options) -> (tempfile::TempDir, interstice_analysis::RunMetrics) {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("run.h5");
    run.write(&p).unwrap();
    let rf = RunFile::open(&p).unwrap();
    let m = analyse(&rf, opts, &ProgressBar::hidden()).unwrap();
    (dir, m)
}

// Known answers by hand: uniform fields in a slab tumour.
#[test]
fn uniform_slab_gives_hand_computed_dose_ratio_auc_and_depths() {
    let (c_t, c_h, dose) = (4e15, 1e15, 1e9);
    let (_d, m) = analysed(&slab_run(c_t, c_h, dose), &Options::default());
    let s = m.species("s").unwrap();
    let vox = 1e-15; // m3
    let vt = 5.0 * 4.0 * 3.0 * vox; // 60 tumour voxels
    let mass_g = vt * 1e6; // 1 g/mL = 1e6 g/m3
    let last = s.times.last().unwrap();
    let amount = 2.0 * c_t * vt;
    assert!(close(last.tumour.total(), amount, 1e-12));
    assert!(close(last.tumour_percent_id.unwrap(), 100.0 * amount / dose, 1e-12));
    assert!(close(last.tumour_percent_id_per_g.unwrap(), 100.0 * amount / dose / mass_g, 1e-12));
    assert!(close(last.tumour_to_host.unwrap(), c_t / c_h, 1e-12));
    assert_eq!(last.tumour.bound_cells, None);
    // %ID/g grows linearly, so the trapezoidal AUC is exact: (1/2) * 200 s * peak.
    let peak = last.tumour_percent_id_per_g.unwrap();
    assert!(close(s.summary.auc_percent_id_per_g_s.unwrap(), 0.5 * 200.0 * peak, 1e-12));
    assert_eq!(s.summary.time_to_peak_s, Some(200.0));
    assert!(close(s.summary.peak_percent_id_per_g.unwrap(), peak, 1e-15));
    // Depth below the surface (face at x = 50 um): columns at 45, 35, ..., 5 um, equal amounts.
    let p = last.depth_profile.as_ref().unwrap();
    assert_eq!(p.reference, Reference::Surface);
    assert!(close(p.mean_distance_m, 25e-6, 1e-12));
    assert!(close(p.d50_m, 25e-6, 1e-12)); // 60 % of the amount lies within 25 um
    assert!(close(p.d90_m, 45e-6, 1e-12));
    assert!(p.index_total.unwrap().abs() < 1e-12); // uniform: spread like the tissue
    for b in &p.bins {
        assert_eq!(b.voxels, 12); // one column of 4 x 3 voxels per 10 um bin
        assert!(close(b.mean_total, 2.0 * c_t, 1e-12));
    }
    // No vessels, no cells: skipped with notes, not errors.
    assert!(last.vessel_profile.is_none() && last.coverage.is_none());
    assert!(m.notes.iter().any(|n| n.contains("no vessel table")), "{:?}", m.notes);
    assert!(m.notes.iter().any(|n| n.contains("no cell table")), "{:?}", m.notes);
}

// Known answer by hand: density enters %ID/g inversely.
#[test]
fn density_scales_percent_per_gram() {
    let run = slab_run(4e15, 1e15, 1e9);
    let (_a, m1) = analysed(&run, &Options::default());
    let (_b, m2) = analysed(&run, &Options { density_kg_per_m3: 1100.0, ..Options::default() });
    let a = m1.species("s").unwrap().times[2].tumour_percent_id_per_g.unwrap();
    let b = m2.species("s").unwrap().times[2].tumour_percent_id_per_g.unwrap();
    assert!(close(a / b, 1.1, 1e-12));
}

// Analytic profile: distances to a straight vessel along x are sqrt(dy^2 + dz^2) - r. The
// binding-site-barrier index (the barrier of Fujimori et al. 1990, J Nucl Med 31:1191) is checked
// against its definition evaluated by brute force over those analytic distances.
#[test]
fn single_vessel_distances_and_binding_site_barrier_index_match_the_analytic_geometry() {
    let e = Example { n: 16, ..Example::default() };
    let run = synthetic::example(&e);
    let (_d, m) = analysed(&run, &Options::default());
    let l = &m.lattice;
    let region = match &run.snapshots[3].fields[0].values {
        synthetic::Values::U8(v) => v.clone(),
        _ => unreachable!(),
    };
    // Brute force over the analytic distances of the tumour voxels.
    let d: Vec<(usize, f64)> = (0..l.len())
        .filter(|&v| region[v] == 1)
        .map(|v| (v, synthetic::example_vessel_distance(&e, l.centre(l.ijk(v)))))
        .collect();
    let a = m.species("a").unwrap();
    let last = a.times.last().unwrap();
    let p = last.vessel_profile.as_ref().unwrap();
    for b in &p.bins {
        let want =
            d.iter().filter(|(_, x)| *x >= b.lo_m && (*x < b.hi_m || b.hi_m >= p.bins.last().unwrap().hi_m)).count();
        assert_eq!(b.voxels, want, "bin {} um", b.lo_m * 1e6);
    }
    // Cell-bound field 5e15 exp(-d / 15 um) at the last time: the index by its definition.
    let wsum: f64 = d.iter().map(|(_, x)| (-x / 15e-6).exp()).sum();
    let wd: f64 = d.iter().map(|(_, x)| x * (-x / 15e-6).exp()).sum();
    let mean_d = d.iter().map(|(_, x)| x).sum::<f64>() / d.len() as f64;
    let want = 1.0 - (wd / wsum) / mean_d;
    assert!(close(p.index_bound.unwrap(), want, 1e-9), "{:?} vs {want}", p.index_bound);
    // Bound decays faster than free (15 um vs 40 um): a stronger perivascular concentration.
    assert!(p.index_bound.unwrap() > p.index_free.unwrap() && p.index_free.unwrap() > 0.0);
    // The analytic envelope: a bin's mean free concentration lies between the values at its edges.
    for b in p.bins.iter().filter(|b| b.voxels > 0) {
        let f = b.mean[0].unwrap();
        let (hi, lo) = (2e15 * (-b.lo_m / 40e-6).exp(), 2e15 * (-b.hi_m / 40e-6).exp());
        assert!(f <= hi * (1.0 + 1e-12) && f >= lo * (1.0 - 1e-12), "{f} not in [{lo}, {hi}]");
    }
    // Species b is uniform in the tumour: index 0, tumour-to-host ratio 4 by construction.
    let b = m.species("b").unwrap().times.last().unwrap();
    assert!(b.vessel_profile.as_ref().unwrap().index_total.unwrap().abs() < 1e-12);
    assert!(close(b.tumour_to_host.unwrap(), 4.0, 1e-12));
    // The series of the example add up to the dose: balance residual at rounding level.
    assert!(last.balance.as_ref().unwrap().relative_residual.abs() < 1e-9);
}

fn cell_run(internalised: &[u64], kinds: &[u8]) -> Run {
    let l = Lattice { shape_xyz: [4, 2, 1], voxel_size_m: 1e-5, origin_m: [0.0; 3] };
    let mut run = Run::new(l, "cells", &[("s", 1e6)]);
    run.snapshots.push(Snapshot {
        time_s: 60.0,
        step: 1,
        complete: true,
        fields: vec![Column::u8("region", "1", vec![1, 1, 1, 1, 0, 0, 0, 0])],
        cells: Some(vec![
            Column::u32("voxel", "1", (0..internalised.len() as u32).collect()),
            Column::u8("kind", "1", kinds.to_vec()),
            Column::u64("internalised_s", "particles", internalised.to_vec()),
            Column::u64("bound_s", "particles", vec![10; internalised.len()]),
        ]),
        vessels: None,
    });
    run
}

// Known answers by hand: coverage, CV (divisor n) and Gini (Gini 1912) of chosen loads.
#[test]
fn coverage_cv_and_gini_of_chosen_cell_loads() {
    // Four cancer cells (0, 10, 20, 70) and a host cell with 1000, which does not count.
    let run = cell_run(&[0, 10, 20, 70, 1000], &[1, 1, 1, 1, 0]);
    let (_d, m) = analysed(&run, &Options { threshold_particles: 15.0, ..Options::default() });
    let x = &m.species("s").unwrap().times[0];
    let c = x.coverage.as_ref().unwrap();
    assert_eq!((c.cancer_cells, c.fraction), (4, 0.5));
    assert_eq!(c.curve[0], (0.0, 0.75)); // three of four cells exceed 0
    assert_eq!(*c.curve.last().unwrap(), (70.0, 0.0)); // none exceeds the largest load
    let s = x.spread.as_ref().unwrap();
    // sorted (0, 10, 20, 70), n = 4, sum 100: G = (-3*0 - 1*10 + 1*20 + 3*70) / (4 * 100) = 0.55
    assert!(close(s.gini_internalised, 0.55, 1e-14));
    // mean 25, population variance (625 + 225 + 25 + 2025) / 4 = 725
    assert!(close(s.cv_internalised, 725f64.sqrt() / 25.0, 1e-14));
    assert!(close(s.mean_internalised, 25.0, 1e-14));
    // bound + internalised = (10, 20, 30, 80): mean 35, G = (-30 - 20 + 30 + 240) / (4 * 140)
    assert!(close(s.gini_associated.unwrap(), 220.0 / 560.0, 1e-14));
    // The cell columns fill the compartments when there is no field: 100 + 40 in the tumour.
    assert_eq!(x.tumour.internalised, Some(100.0));
    assert_eq!(x.tumour.bound_cells, Some(40.0));
    assert_eq!(x.host.internalised, Some(1000.0));
}

// The contract for killed runs: analyse the finished snapshots only.
#[test]
fn killed_runs_are_analysed_over_their_finished_snapshots() {
    let mut run = slab_run(4e15, 1e15, 1e9);
    run.status = "running".into();
    run.finished_snapshots = Some(2);
    run.snapshots[2].complete = false;
    let (_d, m) = analysed(&run, &Options::default());
    assert_eq!(m.snapshots.len(), 2);
    assert_eq!(m.species("s").unwrap().times.len(), 2);
    assert!(m.notes.iter().any(|n| n.contains("did not finish") && n.contains("2 of 3")), "{:?}", m.notes);
    // A group marked incomplete stops the analysis there even if the counter says more.
    let mut run = slab_run(4e15, 1e15, 1e9);
    run.finished_snapshots = Some(3);
    run.snapshots[1].complete = false;
    let (_d, m) = analysed(&run, &Options::default());
    assert_eq!(m.snapshots.len(), 1);
    // Series longer than the finished snapshots are cut.
    let mut run = slab_run(4e15, 1e15, 1e9);
    run.finished_snapshots = Some(2);
    run.series.push(("time_s".into(), "s".into(), vec![0.0, 100.0, 200.0]));
    let (_d, m) = analysed(&run, &Options::default());
    assert_eq!(m.series[0].values, vec![0.0, 100.0]);
}

// The error contract: every bad input is a typed error whose message names the file.
#[test]
fn bad_inputs_get_typed_errors_naming_the_file() {
    let dir = tempfile::tempdir().unwrap();
    let missing = dir.path().join("missing.h5");
    let e = RunFile::open(&missing).err().unwrap();
    assert!(matches!(e, AnalysisError::NotFound { .. }) && e.to_string().contains("missing.h5: no such file"), "{e}");

    let text = dir.path().join("notes.h5");
    std::fs::write(&text, "not hdf5").unwrap();
    let e = RunFile::open(&text).err().unwrap();
    assert!(matches!(e, AnalysisError::NotHdf5 { .. }) && e.to_string().contains("notes.h5"), "{e}");

    let other = dir.path().join("other.h5");
    hdf5::File::create(&other).unwrap().create_group("data").unwrap();
    let e = RunFile::open(&other).err().unwrap();
    assert!(e.to_string().contains("other.h5: not an interstice run file: no root attribute `format`"), "{e}");

    let p = dir.path().join("run.h5");
    slab_run(1.0, 1.0, 1.0).write(&p).unwrap();
    let rf = RunFile::open(&p).unwrap();
    let e = analyse(&rf, &Options { species: vec!["zz".into()], ..Options::default() }, &ProgressBar::hidden())
        .unwrap_err();
    assert!(e.to_string().contains("no particle species `zz` (the run holds: s)"), "{e}");
    for (opts, what) in [
        (Options { threshold_particles: -1.0, ..Options::default() }, "bad value for threshold: -1"),
        (Options { threshold_particles: f64::NAN, ..Options::default() }, "bad value for threshold: NaN"),
        (Options { density_kg_per_m3: 0.0, ..Options::default() }, "bad value for density"),
        (Options { bin_width_m: Some(-1e-6), ..Options::default() }, "bad value for bin width"),
    ] {
        let e = analyse(&rf, &opts, &ProgressBar::hidden()).unwrap_err();
        assert!(matches!(e, AnalysisError::BadOption { .. }) && e.to_string().contains(what), "{e}");
    }
    let snap = rf.snapshots[0].clone();
    let e = rf.require_field(&snap, "pressure").unwrap_err();
    assert!(e.to_string().contains("snapshot 000000 has no field `pressure` (it holds: free_s, region)"), "{e}");
    let e = rf.snapshot(7).unwrap_err();
    assert!(e.to_string().contains("no finished snapshot 7"), "{e}");

    // A run killed before its first snapshot finished.
    let mut run = slab_run(1.0, 1.0, 1.0);
    run.snapshots.truncate(1);
    run.snapshots[0].complete = false;
    run.status = "running".into();
    let p = dir.path().join("early.h5");
    run.write(&p).unwrap();
    let e = cli::report(&p, None, &cli::AnalysisArgs::default()).unwrap_err();
    assert!(matches!(e, AnalysisError::NoSnapshots { .. }) && e.to_string().contains("early.h5"), "{e}");
}

/// Decodes a PNG; returns (width, height, distinct colours, fraction of non-white pixels).
fn png_stats(bytes: &[u8]) -> (u32, u32, usize, f64) {
    let dec = png::Decoder::new(std::io::Cursor::new(bytes));
    let mut r = dec.read_info().unwrap();
    let mut buf = vec![0; r.output_buffer_size().unwrap()];
    let info = r.next_frame(&mut buf).unwrap();
    let px: Vec<&[u8]> = buf[..info.buffer_size()].chunks(3).collect();
    let mut colours: Vec<[u8; 3]> = px.iter().map(|p| [p[0], p[1], p[2]]).collect();
    let non_white = colours.iter().filter(|c| **c != [255, 255, 255]).count() as f64 / colours.len() as f64;
    colours.sort();
    colours.dedup();
    (info.width, info.height, colours.len(), non_white)
}

// Outside reference: the png crate's decoder reads the files back.
#[test]
fn plots_are_valid_images_of_the_expected_size_and_not_blank() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("example.h5");
    synthetic::example(&Example { n: 12, ..Example::default() }).write(&p).unwrap();
    let out = dir.path().join("plots");
    let files =
        cli::plots(&p, &out, &cli::AnalysisArgs { quiet: true, ..Default::default() }, &cli::PlotArgs::default())
            .unwrap();
    let names: Vec<String> = files.iter().map(|f| f.file_name().unwrap().to_string_lossy().into_owned()).collect();
    for want in [
        "time_course_a.png",
        "profile_vessel_a.svg",
        "profile_surface_b.png",
        "coverage_a.png",
        "fluid_0.svg",
        "slice_total_a_000003_z.png",
        "slice_region_000003_z.svg",
    ] {
        assert!(names.iter().any(|n| n == want), "{want} missing from {names:?}");
    }
    for f in &files {
        let bytes = std::fs::read(f).unwrap();
        if f.extension().unwrap() == "png" {
            let (w, h, colours, ink) = png_stats(&bytes);
            let want =
                if names.iter().any(|n| f.ends_with(n) && n.starts_with("slice")) { (760, 560) } else { plot::SIZE };
            assert_eq!((w, h), want, "{}", f.display());
            assert!(colours > 8 && ink > 0.02, "{} looks blank: {colours} colours, {ink} ink", f.display());
        } else {
            let s = String::from_utf8(bytes).unwrap();
            assert!(s.starts_with("<svg") && s.trim_end().ends_with("</svg>"), "{}", f.display());
            assert!(s.contains("width=\"") && s.contains("<text") && (s.contains("<polyline") || s.contains("<rect")));
        }
    }
    // A slice of a missing field is a typed error naming it.
    let e = cli::plots(
        &p,
        &out,
        &cli::AnalysisArgs::default(),
        &cli::PlotArgs { fields: vec!["oxygen".into()], ..Default::default() },
    )
    .unwrap_err();
    assert!(e.to_string().contains("no field `oxygen`"), "{e}");
    let e =
        cli::plots(&p, &out, &cli::AnalysisArgs::default(), &cli::PlotArgs { axis: "w".into(), ..Default::default() })
            .unwrap_err();
    assert!(e.to_string().contains("bad value for slice axis: w: expected x, y or z"), "{e}");
}

fn has_no_outside_reference(html: &str) {
    for bad in ["src=\"http", "href=\"http", "url(http", "src=\"//", "<link", "@import"] {
        assert!(!html.contains(bad), "the page refers outside: {bad}");
    }
}

// Known answer by construction: the example's tissue amounts do not depend on the dose.
#[test]
fn report_and_comparison_pages_are_self_contained_and_carry_the_caution() {
    let dir = tempfile::tempdir().unwrap();
    let a = dir.path().join("a.h5");
    let b = dir.path().join("b.h5");
    synthetic::example(&Example { n: 12, ..Example::default() }).write(&a).unwrap();
    synthetic::example(&Example { n: 12, dose_a: 2e10, name: "double".into(), ..Example::default() })
        .write(&b)
        .unwrap();
    let args = cli::AnalysisArgs { quiet: true, ..Default::default() };
    let page = cli::report(&a, None, &args).unwrap();
    assert_eq!(page, dir.path().join("a-report.html"));
    let html = std::fs::read_to_string(&page).unwrap();
    assert!(html.contains(interstice_analysis::CAUTION));
    assert!(html.contains("data:image/png;base64,") && html.contains("<svg"));
    assert!(html.contains("binding-site-barrier index") && html.contains("Fujimori"));
    assert!(html.contains("Provenance") && html.contains("Resolved scenario"));
    has_no_outside_reference(&html);

    let cmp = dir.path().join("cmp.html");
    let csv = dir.path().join("csv");
    cli::compare(&[a.clone(), b.clone()], &cmp, Some(&csv), &args).unwrap();
    let html = std::fs::read_to_string(&cmp).unwrap();
    assert!(html.contains(interstice_analysis::CAUTION) && html.contains("double") && html.contains("example"));
    has_no_outside_reference(&html);
    // Twice the dose, same tissue amounts: half the %ID (by construction of the example).
    let summary = std::fs::read_to_string(csv.join("summary.csv")).unwrap();
    let peak = |run: &str| -> f64 {
        summary
            .lines()
            .find(|l| l.starts_with(&format!("{run},a,peak_tumour_percent_id,")))
            .and_then(|l| l.split(',').nth(3))
            .unwrap()
            .parse()
            .unwrap()
    };
    assert!(close(peak("example"), 2.0 * peak("double"), 1e-12));
    let e = cli::compare(&[a], &cmp, None, &args).unwrap_err();
    assert!(e.to_string().contains("at least two run files"), "{e}");
}

// The tidy layout of tables.rs: one row per run, species, time and quantity, units on every row.
#[test]
fn tables_are_tidy_with_units_on_every_row() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("example.h5");
    synthetic::example(&Example { n: 10, ..Example::default() }).write(&p).unwrap();
    let (files, summary) =
        cli::metrics(&p, &dir.path().join("t"), &cli::AnalysisArgs { quiet: true, ..Default::default() }).unwrap();
    assert_eq!(files.len(), 5);
    assert!(summary.contains("species a:") && summary.contains(interstice_analysis::CAUTION));
    for f in &files {
        let text = std::fs::read_to_string(f).unwrap();
        let mut lines = text.lines();
        let header: Vec<&str> = lines.next().unwrap().split(',').collect();
        assert_eq!(header[0], "run");
        assert_eq!(*header.last().unwrap(), "units");
        let mut n = 0;
        for l in lines {
            let cells: Vec<&str> = l.split(',').collect();
            assert_eq!(cells.len(), header.len(), "{}: {l}", f.display());
            assert!(!cells.last().unwrap().is_empty(), "{}: {l}", f.display());
            n += 1;
        }
        assert!(n > 0, "{} is empty", f.display());
    }
    let metrics = std::fs::read_to_string(dir.path().join("t/metrics.csv")).unwrap();
    assert!(metrics.contains("example,a,7200.0,tumour_percent_id_per_g,"));
    assert!(metrics.contains(",fluid_leakage_m3_per_s,") && metrics.contains("m3 s-1"));
    assert!(tables::num(f64::NAN) == "NA");
}

// Missing species and fields give notes in the report, not errors.
#[test]
fn runs_without_species_or_optional_fields_still_report() {
    let l = Lattice { shape_xyz: [6, 6, 6], voxel_size_m: 2e-5, origin_m: [0.0; 3] };
    let mut run = Run::new(l.clone(), "bare", &[]);
    run.snapshots.push(Snapshot {
        time_s: 0.0,
        step: 0,
        complete: true,
        fields: vec![Column::u8("region", "1", (0..l.len()).map(|v| u8::from(l.ijk(v)[0] > 2)).collect())],
        ..Snapshot::default()
    });
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("bare.h5");
    run.write(&p).unwrap();
    let page = cli::report(
        &p,
        Some(&dir.path().join("r/bare.html")),
        &cli::AnalysisArgs { quiet: true, ..Default::default() },
    )
    .unwrap();
    let html = std::fs::read_to_string(page).unwrap();
    assert!(html.contains("no particle species"), "notes missing");
    assert!(report::esc("<a&b>") == "&lt;a&amp;b&gt;");
    assert!(Path::new(&dir.path().join("r/bare.html")).exists());
}
