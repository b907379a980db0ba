//! Scenario parsing: round trip and every rejection path, each with the promised message.

use std::path::Path;

use super::*;

fn load(text: &str) -> Result<LoadedScenario, ScenarioError> {
    LoadedScenario::from_text(Path::new("case.toml"), text.to_string())
}

fn only_problem(text: &str) -> (Problem, String) {
    let e = load(text).expect_err("scenario should be rejected");
    let msg = e.to_string();
    assert_eq!(e.problems().len(), 1, "{msg}");
    (e.problems()[0].clone(), msg)
}

#[test]
fn empty_file_gives_the_defaults() {
    let s = load("").unwrap();
    assert_eq!(s.scenario, Scenario::default());
}

#[test]
fn round_trip_through_toml() {
    let text = "[run]\nname = \"rt\"\nseed = 9\nend_time_h = 3.0\n[lattice]\nshape = [10, 12, 14]\nvoxel_um = 15.0\n\
                [tumour]\nshape = \"ellipsoid\"\nsemi_axes_um = [60.0, 50.0, 40.0]\n";
    let a = load(text).unwrap().scenario;
    assert_eq!(a.lattice.shape, [10, 12, 14]);
    assert_eq!(a.tumour.shape, TumourShape::Ellipsoid);
    let again = load(&a.to_string()).unwrap().scenario;
    assert_eq!(a, again);
}

#[test]
fn unknown_key_is_named_with_its_line_and_the_allowed_keys() {
    let (p, msg) = only_problem("[run]\nseed = 1\nsped = 2\n");
    assert_eq!(p.line, Some(3), "{msg}");
    assert_eq!(p.path, "run.sped", "{msg}");
    assert!(msg.contains("case.toml:3"), "{msg}");
    assert!(msg.contains("unknown key `sped`"), "{msg}");
    assert!(msg.contains("seed"), "the allowed keys are listed: {msg}");
}

#[test]
fn unknown_section_is_rejected() {
    let (p, msg) = only_problem("[runn]\nseed = 1\n");
    assert_eq!(p.line, Some(1), "{msg}");
    assert!(msg.contains("unknown key `runn`"), "{msg}");
}

#[test]
fn wrong_unit_suffix_points_to_the_right_key() {
    let (p, msg) = only_problem("[lattice]\nvoxel_nm = 20000.0\n");
    assert_eq!(p.path, "lattice.voxel_nm");
    assert_eq!(p.line, Some(2));
    assert!(msg.contains("`voxel_um`"), "{msg}");
    assert!(msg.contains("(um)"), "{msg}");
    let (_, msg) = only_problem("[run]\nend_time_s = 100.0\n");
    assert!(msg.contains("`end_time_h`") && msg.contains("(h)"), "{msg}");
}

#[test]
fn out_of_range_value_names_path_value_range_and_line() {
    let (p, msg) = only_problem("[run]\nseed = 3\n\n[matrix]\ntumour_porosity = 1.5\n");
    assert_eq!(p.path, "matrix.tumour_porosity");
    assert_eq!(p.value, "1.5");
    assert_eq!(p.line, Some(5));
    assert!(msg.contains("case.toml:5: `matrix.tumour_porosity` = 1.5: expected a finite number in (0, 1]"), "{msg}");
}

#[test]
fn negative_and_non_integer_counts_are_rejected() {
    let (p, msg) = only_problem("[lattice]\nvoxel_um = -2.0\n");
    assert_eq!(p.path, "lattice.voxel_um", "{msg}");
    let (p, msg) = only_problem("[lattice]\nshape = [10, 2, 10]\n");
    assert_eq!(p.path, "lattice.shape[1]", "{msg}");
    assert!(msg.contains("whole number in [3, 2048]"), "{msg}");
}

#[test]
fn wrong_type_is_explained() {
    let (p, msg) = only_problem("[run]\nend_time_h = \"six\"\n");
    assert_eq!(p.path, "run.end_time_h", "{msg}");
    assert_eq!(p.line, Some(2));
    assert!(msg.contains("string \"six\""), "{msg}");
    assert!(msg.contains("expected f64"), "{msg}");
}

#[test]
fn unknown_enum_value_lists_the_choices() {
    let (p, msg) = only_problem("[tumour]\nshape = \"cube\"\n");
    assert_eq!(p.path, "tumour.shape", "{msg}");
    assert!(msg.contains("\"sphere\", \"ellipsoid\""), "{msg}");
}

#[test]
fn syntax_error_gives_its_line() {
    let e = load("[run]\nseed = = 2\n").unwrap_err();
    assert_eq!(e.problems()[0].line, Some(2), "{e}");
}

#[test]
fn inconsistent_sections_are_rejected() {
    // A tumour that does not fit in the lattice.
    let (p, msg) = only_problem("[lattice]\nshape = [10, 10, 10]\nvoxel_um = 10.0\n[tumour]\nradius_um = 80.0\n");
    assert_eq!(p.path, "tumour.radius_um", "{msg}");
    assert_eq!(p.line, Some(5));
    assert!(msg.contains("inside the lattice"), "{msg}");
    // Snapshots further apart than the run is long.
    let (p, msg) = only_problem("[run]\nend_time_h = 1.0\nsnapshot_interval_h = 2.0\n");
    assert_eq!(p.path, "run.snapshot_interval_h", "{msg}");
    assert!(msg.contains("at most run.end_time_h"), "{msg}");
}

#[test]
fn several_problems_are_all_reported() {
    let e = load("[run]\ntime_step_s = 0.0\n[matrix]\nhost_porosity = 0.0\n").unwrap_err();
    assert_eq!(e.problems().len(), 2, "{e}");
    assert!(e.to_string().starts_with("case.toml: 2 problems"), "{e}");
}

#[test]
fn defaults_table_documents_every_key() {
    let t = defaults_table();
    for sec in Scenario::sections() {
        assert!(t.contains(sec.name), "{}", sec.name);
        for k in &sec.keys {
            assert!(
                t.contains(&format!("\n{} = ", k.key))
                    || t.contains(&format!("\n# {}: see", k.key))
                    || t.contains(&format!("\n# {} = (not set)", k.key)),
                "{}.{}",
                sec.name,
                k.key
            );
            assert!(!k.doc.trim().is_empty(), "{}.{} has no documentation", sec.name, k.key);
        }
        // Every key of the serialised defaults is declared in the spec.
        if let toml::Value::Table(tab) = &sec.defaults {
            for key in tab.keys() {
                assert!(sec.keys.iter().any(|s| s.key == key), "{}.{key} is not in the spec", sec.name);
            }
        }
    }
}

#[test]
fn particle_designs_are_checked() {
    let (p, msg) =
        only_problem("[[particle]]\nname = \"a\"\n[[particle]]\nname = \"b\"\nhydrodynamic_radius_nm = 0.0\n");
    assert_eq!(p.path, "particle[1].hydrodynamic_radius_nm", "{msg}");
    assert_eq!(p.line, Some(5), "{msg}");
    let (p, msg) = only_problem("[[particle]]\nname = \"a\"\n[[particle]]\nname = \"a\"\n");
    assert_eq!(p.path, "particle[1].name", "{msg}");
    let (p, msg) = only_problem("[[particle]]\nname = \"a\"\n[particle.ligand]\nvalency = 0\n");
    assert_eq!(p.path, "particle[0].ligand.valency", "{msg}");
    assert_eq!(p.line, Some(4), "{msg}");
}

#[test]
fn numbers_without_a_range_still_must_be_finite() {
    let (p, msg) = only_problem("[lattice]\norigin_um = [0.0, nan, 0.0]\n");
    assert_eq!(p.path, "lattice.origin_um[1]", "{msg}");
}
