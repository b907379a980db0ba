//! Sweep files and their expansion: counts, ranges, determinism, strata, seeds and the messages
//! of bad input.

use std::path::{Path, PathBuf};

use interstice_sim::rng::{Domain, stream_key};
use interstice_sweep::design::{self, sampling_stream};
use interstice_sweep::spec::SweepSpec;
use interstice_sweep::{Plan, SweepError};

fn configs() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../configs")
}

/// A sweep file in the configs folder (so that `scenario = "sweep-base.toml"` resolves).
fn spec(text: &str) -> Result<SweepSpec, SweepError> {
    SweepSpec::from_text(&configs().join("test-sweep.toml"), text.to_string(), None)
}

fn plan(text: &str) -> Plan {
    Plan::new(spec(text).unwrap()).unwrap()
}

const HEAD: &str = "[sweep]\nname = \"t\"\nscenario = \"sweep-base.toml\"\n";

#[test]
fn grid_counts_every_combination_first_parameter_slowest() {
    let p = plan(&format!(
        "{HEAD}design = \"grid\"\nseed = 5\n\n[[parameter]]\nkey = \"particle[0].hydrodynamic_radius_nm\"\nvalues = [20.0, 50.0, 100.0]\n\n[[parameter]]\nkey = \"particle[0].ligand.kon_per_M_s\"\nvalues = [1.0e4, 1.0e6]\n"
    ));
    assert_eq!(p.runs.len(), 6);
    let pairs: Vec<(f64, f64)> = (0..6).map(|i| (p.numeric(i, 0), p.numeric(i, 1))).collect();
    assert_eq!(pairs, vec![(20.0, 1e4), (20.0, 1e6), (50.0, 1e4), (50.0, 1e6), (100.0, 1e4), (100.0, 1e6)]);
    // Each run's scenario holds its values, its name and its seed.
    let t: toml::Table = toml::from_str(&p.scenario_text(3)).unwrap();
    assert_eq!(t["particle"][0]["hydrodynamic_radius_nm"].as_float(), Some(50.0));
    assert_eq!(t["particle"][0]["ligand"]["kon_per_M_s"].as_float(), Some(1e6));
    assert_eq!(t["run"]["name"].as_str(), Some("t-000003"));
    assert_eq!(t["run"]["seed"].as_integer(), Some(p.runs[3].seed as i64));
}

#[test]
fn run_seeds_are_derived_from_the_sweep_seed_and_index() {
    let p = plan(&format!(
        "{HEAD}design = \"list\"\nseed = 99\n\n[[parameter]]\nkey = \"tumour.radius_um\"\nvalues = [80.0, 90.0, 100.0]\n"
    ));
    for (i, r) in p.runs.iter().enumerate() {
        assert_eq!(r.seed, stream_key(99, Domain::Sweep, i as u64, 0) >> 1);
    }
    let shared = plan(&format!(
        "{HEAD}design = \"list\"\nseed = 99\nseeds = \"shared\"\n\n[[parameter]]\nkey = \"tumour.radius_um\"\nvalues = [80.0, 90.0]\n"
    ));
    assert!(shared.runs.iter().all(|r| r.seed == 99));
    // Without `seed`, the base scenario's run.seed (4242 in sweep-base.toml).
    let base =
        plan(&format!("{HEAD}design = \"list\"\n\n[[parameter]]\nkey = \"tumour.radius_um\"\nvalues = [80.0]\n"));
    assert_eq!(base.spec.seed, 4242);
}

#[test]
fn list_design_runs_values_side_by_side_with_linked_keys() {
    let p = plan(&format!(
        "{HEAD}design = \"list\"\n\n[[parameter]]\nkeys = [\"matrix.tumour_collagen_fraction\", \"matrix.tumour_porosity\"]\nvalues = [[0.02, 0.45], [0.06, 0.3]]\n\n[[parameter]]\nkey = \"particle[0].coating\"\nvalues = [\"none\", \"stealth\"]\n"
    ));
    assert_eq!(p.runs.len(), 2);
    assert_eq!(p.columns(), vec!["matrix.tumour_collagen_fraction", "matrix.tumour_porosity", "particle[0].coating"]);
    assert_eq!(p.numeric(1, 1), 0.3);
    assert_eq!(p.runs[0].values[2].as_str(), Some("none"));
}

const SAMPLED: &str = "\n[[parameter]]\nkey = \"tumour.radius_um\"\nmin = 60.0\nmax = 110.0\n\n[[parameter]]\nkey = \"particle[0].ligand.kon_per_M_s\"\nmin = 1.0e3\nmax = 1.0e7\nscale = \"log\"\n";

#[test]
fn latin_hypercube_hits_each_stratum_once_and_stays_in_range() {
    // McKay, Beckman and Conover 1979: with n points each of the n strata of every dimension
    // holds exactly one point.
    let n = 50;
    let p = plan(&format!("{HEAD}design = \"latin-hypercube\"\nseed = 3\nsamples = {n}\n{SAMPLED}"));
    assert_eq!(p.runs.len(), n);
    let unit = p.unit.as_ref().unwrap();
    for k in 0..2 {
        let mut strata: Vec<usize> = unit.iter().map(|r| (r[k] * n as f64).floor() as usize).collect();
        strata.sort_unstable();
        assert_eq!(strata, (0..n).collect::<Vec<_>>(), "dimension {k}");
    }
    for (i, row) in unit.iter().enumerate() {
        let r = p.numeric(i, 0);
        let kon = p.numeric(i, 1);
        assert!((60.0..=110.0).contains(&r));
        assert!((1e3..=1e7).contains(&kon));
        // Log scale: the stratum of log10(kon) is the stratum of its unit coordinate.
        let u = (kon.log10() - 3.0) / 4.0;
        assert!((u - row[1]).abs() < 1e-12);
    }
}

#[test]
fn expansion_is_deterministic_and_depends_on_the_seed() {
    let t = format!("{HEAD}design = \"saltelli\"\nseed = 8\nsamples = 4\n{SAMPLED}");
    let a = plan(&t);
    let b = plan(&t);
    assert_eq!(a.runs, b.runs);
    assert_eq!(
        (0..a.runs.len()).map(|i| a.scenario_text(i)).collect::<Vec<_>>(),
        (0..b.runs.len()).map(|i| b.scenario_text(i)).collect::<Vec<_>>()
    );
    let c = plan(&t.replace("seed = 8", "seed = 9"));
    assert_ne!(a.runs, c.runs);
}

#[test]
fn saltelli_and_morris_counts_and_structure() {
    let s = plan(&format!("{HEAD}design = \"saltelli\"\nseed = 8\nsamples = 4\n{SAMPLED}"));
    assert_eq!(s.runs.len(), 4 * (2 + 2));
    let s2 = plan(&format!("{HEAD}design = \"saltelli\"\nseed = 8\nsamples = 4\nsecond_order = true\n{SAMPLED}"));
    assert_eq!(s2.runs.len(), 4 * (2 * 2 + 2));
    // Saltelli 2002: in each block, A_B^(i) is A with column i from B.
    let u = s.unit.as_ref().unwrap();
    for j in 0..4 {
        let blk = &u[j * 4..j * 4 + 4];
        let (a, b) = (&blk[0], &blk[3]);
        assert_eq!(blk[1], vec![b[0], a[1]]);
        assert_eq!(blk[2], vec![a[0], b[1]]);
    }
    let m = plan(&format!("{HEAD}design = \"morris\"\nseed = 8\nsamples = 5\nlevels = 4\n{SAMPLED}"));
    assert_eq!(m.runs.len(), 5 * 3);
    // Morris levels: every coordinate on the grid {0, 1/3, 2/3, 1}.
    for r in m.unit.as_ref().unwrap() {
        for x in r {
            assert!(((x * 3.0) - (x * 3.0).round()).abs() < 1e-12);
        }
    }
    // The sampling stream is the design module's: the same unit matrix.
    let again = design::morris(5, 2, 4, &mut sampling_stream(8));
    assert_eq!(&again, m.unit.as_ref().unwrap());
}

fn problems(text: &str) -> String {
    match spec(text).and_then(Plan::new) {
        Ok(_) => panic!("accepted:\n{text}"),
        Err(e) => {
            let mut s = e.to_string();
            let mut src = std::error::Error::source(&e);
            while let Some(c) = src {
                s.push_str(&format!("\ncaused by: {c}"));
                src = c.source();
            }
            s
        }
    }
}

#[test]
fn bad_sweep_files_name_file_line_key_and_allowed_range() {
    // A range outside the key's own range (tumour_porosity is in (0, 1]).
    let e = problems(&format!(
        "{HEAD}design = \"latin-hypercube\"\nsamples = 4\n\n[[parameter]]\nkey = \"matrix.tumour_porosity\"\nmin = 0.2\nmax = 1.5\n"
    ));
    assert!(e.contains("test-sweep.toml:10: `parameter[0].max` = 1.5: expected a finite number in (0, 1]"), "{e}");
    // An unknown key, with the section's keys listed.
    let e = problems(&format!(
        "{HEAD}design = \"grid\"\n\n[[parameter]]\nkey = \"matrix.tumour_porosity_percent\"\nvalues = [1.0]\n"
    ));
    assert!(e.contains(":7: `parameter[0].key`") && e.contains("one of the keys of [matrix]"), "{e}");
    // Values on a sampled design; samples missing.
    let e =
        problems(&format!("{HEAD}design = \"morris\"\n\n[[parameter]]\nkey = \"tumour.radius_um\"\nvalues = [1.0]\n"));
    assert!(e.contains("`sweep.samples`") && e.contains("`parameter[0].values`"), "{e}");
    // Unknown key in [sweep].
    let e = problems(&format!("{HEAD}design = \"grid\"\nthreads = 4\n"));
    assert!(e.contains(":5: `sweep.threads`") && e.contains("unknown key"), "{e}");
    // The sweep may not set run.seed.
    let e = problems(&format!("{HEAD}design = \"grid\"\n\n[[parameter]]\nkey = \"run.seed\"\nvalues = [1]\n"));
    assert!(e.contains("the sweep sets them"), "{e}");
    // A log range must be positive.
    let e = problems(&format!(
        "{HEAD}design = \"latin-hypercube\"\nsamples = 3\n\n[[parameter]]\nkey = \"cells.cancer_receptors_per_cell\"\nmin = 0.0\nmax = 1.0e5\nscale = \"log\"\n"
    ));
    assert!(e.contains("`parameter[0].min` = 0: expected a number above 0 with scale = \"log\""), "{e}");
    // Lists of unequal length in the list design.
    let e = problems(&format!(
        "{HEAD}design = \"list\"\n\n[[parameter]]\nkey = \"tumour.radius_um\"\nvalues = [80.0, 90.0]\n\n[[parameter]]\nkey = \"matrix.tumour_porosity\"\nvalues = [0.3]\n"
    ));
    assert!(e.contains("`parameter[1].values` = 1 values: expected 2 values"), "{e}");
    // An index the base scenario does not have.
    let e = problems(&format!(
        "{HEAD}design = \"grid\"\n\n[[parameter]]\nkey = \"particle[3].hydrodynamic_radius_nm\"\nvalues = [10.0]\n"
    ));
    assert!(e.contains("`particle[3]` does not exist"), "{e}");
}

#[test]
fn a_generated_scenario_that_fails_engine_validation_names_its_run() {
    // Each radius is a valid key value, but a 200 um tumour does not fit the 240 um lattice:
    // the engine's consistency check rejects run 1 only.
    let e = problems(&format!(
        "{HEAD}design = \"list\"\n\n[[parameter]]\nkey = \"tumour.radius_um\"\nvalues = [90.0, 200.0]\n"
    ));
    assert!(e.contains("run 1 (tumour.radius_um = 200.0): its scenario is not valid"), "{e}");
    assert!(e.contains("caused by: runs/000001/scenario.toml") && e.contains("a tumour inside the lattice"), "{e}");
}
