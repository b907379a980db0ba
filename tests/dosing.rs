//! End-to-end check of dose schedules: the dosing demo runs, its run file passes the h5py checks
//! (particle balance at every snapshot), its `injected_<design>` series follow the schedules
//! exactly, and its plasma curves follow the closed-form superposition of the doses
//! (superposition principle; Gibaldi and Perrier 1982, Pharmacokinetics, 2nd ed., chapters on the
//! compartment models and on multiple dosing, chapter numbers from memory).

mod common;

use common::*;
use interstice_sim::params::Params;
use interstice_sim::vessels::pk::Elimination;

#[test]
fn the_dosing_demo_gives_its_schedules_exactly_and_follows_the_superposition() {
    let config = root().join("configs/dosing-demo.toml");
    let out = interstice(&["check", config.to_str().unwrap()]);
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(text.contains("[dosing]") && text.contains("small-stealth: total dose"), "{text}");
    assert!(text.contains("large-bare: infusion") && text.contains("from 5 h to 7 h"), "{text}");

    let dir = tempfile::tempdir().unwrap();
    interstice(&["run", config.to_str().unwrap(), "--out", dir.path().to_str().unwrap(), "-q"]);
    let file = dir.path().join("dosing-demo.h5");
    let text = python("check_runfile.py", &[file.to_str().unwrap(), "--min-snapshots", "33"]);
    assert!(text.contains("all checks passed"), "{text}");

    let loaded = interstice_sim::LoadedScenario::from_file(&config).unwrap();
    let params = Params::resolve_loaded(&loaded);
    let f = hdf5::File::open(&file).unwrap();
    let series = |name: &str| f.dataset(&format!("series/{name}")).unwrap().read_raw::<f64>().unwrap();
    let times = series("time_s");
    assert_eq!(times.len(), 33);
    for p in &params.particles {
        let s = &p.schedule;
        let injected = series(&format!("injected_{}", p.name));
        let plasma = series(&format!("plasma_{}", p.name));
        let e = Elimination::of(p, params.blood.plasma_volume()).unwrap();
        for (i, &t) in times.iter().enumerate() {
            // A snapshot at a bolus time is written before the step that gives the bolus.
            let given: u64 = s.boluses.iter().filter(|b| b.time == 0.0 || b.time < t).map(|b| b.particles).sum::<u64>()
                + s.infusions.iter().map(|inf| inf.given_by(t)).sum::<u64>();
            assert_eq!(injected[i], given as f64, "injected_{} at {t} s", p.name);
            // Superposition of the responses: boluses the model's central fraction, infusions its
            // time integral (trapezoid over 2000 sub-intervals of the closed form).
            let mut want: f64 = s
                .boluses
                .iter()
                .filter(|b| b.time == 0.0 || b.time < t)
                .map(|b| b.particles as f64 * e.central_fraction(t - b.time))
                .sum();
            for inf in &s.infusions {
                let upto = t.min(inf.end());
                if upto > inf.start {
                    let n = 2000;
                    let h = (upto - inf.start) / n as f64;
                    let g = |u: f64| e.central_fraction(t - u);
                    let integral: f64 = (0..n)
                        .map(|k| 0.5 * h * (g(inf.start + k as f64 * h) + g(inf.start + (k + 1) as f64 * h)))
                        .sum();
                    want += inf.rate() * integral;
                }
            }
            // Binomial noise (sd below sqrt of the amount) plus what the tissue holds (a small
            // tumour against 2 mL of blood: well under 1e-3 of the plasma amount).
            let tol = 6.0 * want.sqrt() + 1e-3 * want + 2.0;
            assert!((plasma[i] - want).abs() <= tol, "plasma_{} at {t} s: {} vs {want}", p.name, plasma[i]);
        }
    }
}

/// The restart tests' scenario with a schedule that straddles its first checkpoint (0.3 h): an
/// infusion from 0.2 h to 1.4 h and boluses at 0.5 h and 1.5 h.
fn resumed() -> String {
    RESTART.replace("name = \"ck\"", "name = \"dk\"")
        + "[[particle.dose]]\nkind = \"infusion\"\nat_h = 0.2\nduration_h = 1.2\nparticles = 6e12\n\
           [[particle.dose]]\nkind = \"repeated\"\nat_h = 0.5\nevery_h = 1.0\ncount = 2\nparticles = 2e12\n"
}

#[test]
fn a_killed_run_with_a_schedule_resumed_from_its_checkpoint_equals_the_uninterrupted_run() {
    let dir = tempfile::tempdir().unwrap();
    let s = scenario(dir.path(), "dk", &resumed());
    let (a, b) = (dir.path().join("a"), dir.path().join("b"));
    interstice(&["run", s.to_str().unwrap(), "--out", a.to_str().unwrap(), "-q"]);
    run_until_checkpoint(&s, &b, "dk");
    interstice(&["run", s.to_str().unwrap(), "--out", b.to_str().unwrap(), "-q", "--resume"]);
    let text = python("compare_runs.py", &[a.join("dk.h5").to_str().unwrap(), b.join("dk.h5").to_str().unwrap()]);
    assert!(text.contains("identical"), "{text}");
}
