//! End-to-end particle checks: D0 against an outside viscosity reference, exact accounting over
//! a run, identical files for 1 and 2 threads.

mod common;

use common::*;

#[test]
fn d0_matches_stokes_einstein_with_iapws_water_viscosity() {
    // Outside reference: the iapws package (IAPWS 2008 viscosity of water) at 37 C.
    let dir = tempfile::tempdir().unwrap();
    let s = scenario(dir.path(), "d0", "[[particle]]\nname = \"np\"\nhydrodynamic_radius_nm = 50.0\n");
    let out = interstice(&["check", s.to_str().unwrap()]);
    let text = String::from_utf8_lossy(&out.stdout);
    let line = text.lines().find(|l| l.contains("np: D0")).expect("D0 line");
    let d0: f64 = line.split_whitespace().find_map(|w| w.parse::<f64>().ok()).expect("D0 value");
    let defaults = String::from_utf8_lossy(&interstice(&["defaults"]).stdout).to_string();
    let mu: f64 = defaults
        .lines()
        .find(|l| l.starts_with("fluid_viscosity_mPa_s"))
        .and_then(|l| l.split('=').nth(1))
        .and_then(|v| v.split_whitespace().next())
        .and_then(|v| v.parse().ok())
        .expect("default viscosity");
    let text = python("check_d0_iapws.py", &["50", &format!("{d0:e}"), &mu.to_string()]);
    assert!(text.contains("check_d0_iapws"), "{text}");
}
