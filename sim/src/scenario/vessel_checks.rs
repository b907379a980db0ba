//! Consistency checks of the vessel, blood and plasma keys: files that must exist and ordered
//! bounds (doses: [`super::dose_checks`]).

use std::path::{Path, PathBuf};

use super::sections::{NetworkSource, PlasmaModel, Scenario, VesselModel};
use super::spec::Problem;

/// Resolves a path written in a scenario against the folder of the scenario file.
pub fn scenario_relative(file: Option<&Path>, written: &str) -> PathBuf {
    let p = Path::new(written);
    if p.is_absolute() {
        return p.to_path_buf();
    }
    match file.and_then(Path::parent) {
        Some(dir) if !dir.as_os_str().is_empty() => dir.join(p),
        _ => p.to_path_buf(),
    }
}

pub(super) fn need_file(file: Option<&Path>, path: &str, written: &str, what: &str, out: &mut Vec<Problem>) {
    if written.is_empty() {
        out.push(Problem {
            path: path.into(),
            value: "\"\"".into(),
            expected: format!("the path of {what}"),
            line: None,
        });
        return;
    }
    let full = scenario_relative(file, written);
    if !full.is_file() {
        out.push(Problem {
            path: path.into(),
            value: format!("{written:?}"),
            expected: format!("an existing file ({what}); looked for {}", full.display()),
            line: None,
        });
    }
}

impl Scenario {
    pub(super) fn vessel_consistency(&self, file: Option<&Path>, out: &mut Vec<Problem>) {
        let n = &self.vessels.network;
        if self.vessels.model == VesselModel::Network {
            match n.source {
                NetworkSource::Csv => {
                    need_file(file, "vessels.network.nodes_csv", &n.nodes_csv, "the node table", out);
                    need_file(file, "vessels.network.segments_csv", &n.segments_csv, "the segment table", out);
                }
                NetworkSource::Vtk => need_file(file, "vessels.network.vtk_file", &n.vtk_file, "the VTK polydata", out),
                NetworkSource::Tumour | NetworkSource::CapillaryBed => {}
            }
        }
        if n.tumour_pore_min_nm > n.tumour_pore_max_nm {
            out.push(Problem {
                path: "vessels.network.tumour_pore_min_nm".into(),
                value: n.tumour_pore_min_nm.to_string(),
                expected: format!("at most vessels.network.tumour_pore_max_nm = {}", n.tumour_pore_max_nm),
                line: None,
            });
        } else if !(n.tumour_pore_min_nm..=n.tumour_pore_max_nm).contains(&n.tumour_pore_median_nm) {
            out.push(Problem {
                path: "vessels.network.tumour_pore_median_nm".into(),
                value: n.tumour_pore_median_nm.to_string(),
                expected: format!(
                    "a radius within [tumour_pore_min_nm, tumour_pore_max_nm] = [{}, {}]",
                    n.tumour_pore_min_nm, n.tumour_pore_max_nm
                ),
                line: None,
            });
        }
        for (i, p) in self.particle.iter().enumerate() {
            let pl = &p.plasma;
            match pl.model {
                PlasmaModel::Table => {
                    need_file(file, &format!("particle[{i}].plasma.table_csv"), &pl.table_csv, "the plasma table", out)
                }
                PlasmaModel::HalfLife
                    if pl.distribution_fraction > 0.0 && pl.distribution_half_life_h >= pl.half_life_h =>
                {
                    out.push(Problem {
                        path: format!("particle[{i}].plasma.distribution_half_life_h"),
                        value: pl.distribution_half_life_h.to_string(),
                        expected: format!("less than the elimination half_life_h = {}", pl.half_life_h),
                        line: None,
                    });
                }
                _ => {}
            }
        }
    }
}
