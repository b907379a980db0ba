//! Scenario sections of the heterogeneous terrain: the tissue generator, oxygen, and growth.

use serde::{Deserialize, Serialize};

use super::spec::{Check, checked_plain, section};

/// How the oxygen level of the blood in the vessels is set.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum BloodTransport {
    /// Every perfused vessel at `blood_pO2_mmHg`.
    Constant,
    /// Carried along the network's perfused segments from the inlets (at `inlet_pO2_mmHg`),
    /// dissolved and bound to haemoglobin (Hill saturation), losing what the walls deliver
    /// (network vessels only).
    AlongVessels,
}
checked_plain!(BloodTransport);

/// How the angiogenic signal of hypoxic cells is modelled in the growth phase.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum AngiogenicSignal {
    /// Present within `sprout_reach_um` of a hypoxic cell, pointing down the distance to the
    /// nearest one (a rule of this project's own).
    Distance,
    /// A steady signal released by hypoxic cells that diffuses and decays over
    /// `signal_decay_length_um`; segments sprout where it exceeds `signal_sprout_threshold` and
    /// tips climb its gradient.
    Diffusing,
}
checked_plain!(AngiogenicSignal);

section! {
    /// Tissue generator: a tumour mask from a file, stromal cells, and spatially correlated
    /// random fields (log-normal, mean 1) that modulate matrix density, receptor expression and
    /// tumour vessel density. A coefficient of variation of 0 switches a field off.
    pub struct TissueSection {
        /// Tumour mask file (raw bytes, one per voxel, x fastest, 0 host and 1 tumour; exactly
        /// nx*ny*nz bytes), relative to the scenario's folder; empty: the [tumour] shape.
        tumour_mask_file: String = String::new();
        /// Fraction of tumour cells that are stromal cells (fibroblasts).
        tumour_stromal_fraction: f64 = 0.0, Check::fraction();
        /// Coefficient of variation of the matrix density factor (collagen and glycosaminoglycan).
        matrix_cv: f64 = 0.0, Check::closed(0.0, 5.0);
        /// Correlation length of the matrix density factor, micrometres.
        matrix_correlation_um: f64 = 60.0, Check::closed(0.0, 1.0e4);
        /// Coefficient of variation of the receptor expression factor of cells.
        receptor_cv: f64 = 0.0, Check::closed(0.0, 5.0);
        /// Correlation length of the receptor expression factor (clonal patches), micrometres.
        receptor_correlation_um: f64 = 40.0, Check::closed(0.0, 1.0e4);
        /// Coefficient of variation of the tumour vessel density factor.
        vessel_density_cv: f64 = 0.0, Check::closed(0.0, 5.0);
        /// Correlation length of the tumour vessel density factor, micrometres.
        vessel_density_correlation_um: f64 = 150.0, Check::closed(0.0, 1.0e4);
    }
}

section! {
    /// Quasi-steady oxygen: diffusion, Michaelis-Menten consumption by living cells, and
    /// sources at the walls of perfused vessels; cell states from oxygen thresholds.
    pub struct OxygenSection {
        /// Solve the oxygen field (always on when growth is on).
        enabled: bool = false;
        /// Oxygen diffusivity in tissue, m^2/s (about 2e-9; from memory).
        diffusivity_m2_per_s: f64 = 2.0e-9, Check::closed(1.0e-12, 1.0e-7);
        /// Oxygen solubility in tissue, mol/(m^3 mmHg) (about 1.3e-3; from memory).
        solubility_mol_per_m3_mmHg: f64 = 1.3e-3, Check::closed(1.0e-5, 1.0e-1);
        /// Oxygen partial pressure of blood in perfused vessels, mmHg (with blood_transport =
        /// "constant").
        blood_pO2_mmHg: f64 = 40.0, Check::closed(0.0, 800.0);
        /// "constant" (every perfused vessel at blood_pO2_mmHg) or "along-vessels" (oxygen
        /// carried by the blood flow from the network's inlets and given up along the way;
        /// vessels.model = "network").
        blood_transport: BloodTransport = BloodTransport::Constant;
        /// Oxygen partial pressure of the blood entering the network, mmHg (along-vessels;
        /// arterial blood about 95; common practice).
        inlet_pO2_mmHg: f64 = 95.0, Check::closed(1.0, 800.0);
        /// Oxygen bound by fully saturated haemoglobin per volume of blood, mol/m^3 (along-vessels;
        /// 150 g/L haemoglobin times 1.34 mL O2/g is about 9; from memory).
        hemoglobin_capacity_mol_per_m3: f64 = 9.0, Check::closed(0.0, 100.0);
        /// Partial pressure of half saturation of haemoglobin, mmHg (along-vessels; about 26.8
        /// for human blood, Severinghaus 1979; from memory).
        hill_p50_mmHg: f64 = 26.8, Check::closed(1.0, 200.0);
        /// Hill exponent of the saturation curve (along-vessels; about 2.7; common practice).
        hill_exponent: f64 = 2.7, Check::closed(1.0, 5.0);
        /// Oxygen permeability of vessel walls, um/s (oxygen crosses walls almost freely: the
        /// default keeps the wall's resistance well below the tissue's; from memory).
        wall_permeability_um_per_s: f64 = 1.0e4, Check::closed(0.0, 1.0e7);
        /// Maximal consumption of a voxel full of living cells, in partial pressure per second,
        /// mmHg/s (1 mmHg/s is about 1e-17 mol/s per cell at 1e8 cells/cm^3; from memory).
        max_consumption_mmHg_per_s: f64 = 1.0, Check::closed(0.0, 1.0e4);
        /// Partial pressure of half-maximal consumption (Michaelis constant), mmHg.
        half_saturation_mmHg: f64 = 1.0, Check::closed(1.0e-6, 100.0);
        /// Factor on the consumption of host cells (1: like cancer cells).
        host_consumption_factor: f64 = 1.0, Check::closed(0.0, 100.0);
        /// Cells below this partial pressure are hypoxic (quiescent), mmHg (radiobiological
        /// hypoxia, about 2.5 mmHg; common practice).
        hypoxic_threshold_mmHg: f64 = 2.5, Check::closed(0.0, 800.0);
        /// Cells below this partial pressure are anoxic and die (necrotic), mmHg.
        necrotic_threshold_mmHg: f64 = 0.5, Check::closed(0.0, 800.0);
        /// Largest relative change of the oxygen field between Newton iterations at convergence.
        newton_tolerance: f64 = 1.0e-4, Check::above_upto(0.0, 0.1);
        /// Most Newton iterations of one oxygen solve.
        newton_max_iterations: u32 = 40, Check::count(1.0, 1000.0);
        /// Relative residual of each linear solve.
        solver_tolerance: f64 = 1.0e-6, Check::above_upto(0.0, 1.0e-2);
    }
}

section! {
    /// Agent-based growth of the tumour before dosing: division when oxygen allows, shoving,
    /// quiescence, necrosis, sprouting angiogenesis toward hypoxia, matrix deposition.
    pub struct GrowthSection {
        /// Grow the tumour before the delivery phase starts.
        enabled: bool = false;
        /// Simulated growth before dosing, days.
        duration_d: f64 = 2.0, Check::above_upto(0.0, 365.0);
        /// Growth step, hours.
        time_step_h: f64 = 2.0, Check::above_upto(0.0, 48.0);
        /// Interval between growth snapshots, hours.
        snapshot_interval_h: f64 = 12.0, Check::above_upto(0.0, 1.0e4);
        /// Cell cycle time of well-oxygenated cancer cells, hours.
        cycle_time_h: f64 = 24.0, Check::closed(1.0, 1.0e4);
        /// Farthest a division pushes its neighbours to reach a free voxel, voxels.
        max_push_voxels: u32 = 4, Check::count(0.0, 64.0);
        /// Reach of the angiogenic signal of hypoxic cells, micrometres (angiogenic_signal =
        /// "distance").
        sprout_reach_um: f64 = 200.0, Check::closed(0.0, 1.0e4);
        /// "distance" (the signal is present within sprout_reach_um of a hypoxic cell) or
        /// "diffusing" (a steady signal released by hypoxic cells, diffusing and decaying).
        angiogenic_signal: AngiogenicSignal = AngiogenicSignal::Distance;
        /// Decay length sqrt(D / k) of a diffusing signal, micrometres (growth factors such as
        /// VEGF act over some 100 um; from memory).
        signal_decay_length_um: f64 = 100.0, Check::closed(1.0, 1.0e4);
        /// Level of a diffusing signal, relative to its level inside a large hypoxic region, from
        /// which perfused segments sprout (hypoxic cells usually form thin shells, whose signal
        /// stays near 0.1 even among them).
        signal_sprout_threshold: f64 = 0.02, Check::above_upto(0.0, 1.0);
        /// Sprouting probability of a perfused segment within reach of hypoxic cells, per hour.
        sprout_rate_per_h: f64 = 0.02, Check::closed(0.0, 10.0);
        /// Length a sprout tip grows per growth step, micrometres.
        sprout_step_um: f64 = 30.0, Check::closed(1.0, 1000.0);
        /// Lumen radius of new sprouts, micrometres.
        sprout_radius_um: f64 = 4.0, Check::closed(1.0, 50.0);
        /// A tip within this distance of another vessel node joins it (anastomosis), micrometres.
        anastomosis_distance_um: f64 = 40.0, Check::closed(1.0, 1000.0);
        /// Longest sprout before it stops growing, micrometres.
        max_sprout_length_um: f64 = 300.0, Check::closed(1.0, 1.0e4);
        /// Most sprout tips growing at once.
        max_tips: u32 = 500, Check::count(0.0, 1.0e6);
        /// Collagen volume fraction a stromal cell deposits in its voxel, per day.
        stromal_collagen_per_day: f64 = 0.005, Check::closed(0.0, 1.0);
        /// Largest collagen volume fraction deposition can reach.
        max_collagen_fraction: f64 = 0.2, Check::closed(0.0, 0.5);
    }
}

impl super::Scenario {
    /// The mask file must exist, thresholds must be ordered, growth snapshots fit the growth.
    pub(super) fn tissue_consistency(&self, file: Option<&std::path::Path>, out: &mut Vec<super::Problem>) {
        let t = &self.tissue;
        if !t.tumour_mask_file.is_empty() {
            super::vessel_checks::need_file(
                file,
                "tissue.tumour_mask_file",
                &t.tumour_mask_file,
                "the tumour mask",
                out,
            );
        }
        let o = &self.oxygen;
        if o.necrotic_threshold_mmHg > o.hypoxic_threshold_mmHg {
            out.push(super::Problem {
                path: "oxygen.necrotic_threshold_mmHg".into(),
                value: o.necrotic_threshold_mmHg.to_string(),
                expected: format!("at most oxygen.hypoxic_threshold_mmHg = {}", o.hypoxic_threshold_mmHg),
                line: None,
            });
        }
        if o.blood_transport == BloodTransport::AlongVessels && self.vessels.model != super::VesselModel::Network {
            out.push(super::Problem {
                path: "oxygen.blood_transport".into(),
                value: "\"along-vessels\" with vessels.model = \"continuum\"".into(),
                expected: "\"constant\" with continuum vessels (they have no segments to carry blood along), or \
                           vessels.model = \"network\""
                    .into(),
                line: None,
            });
        }
        let g = &self.growth;
        if g.enabled && g.time_step_h > g.duration_d * 24.0 {
            out.push(super::Problem {
                path: "growth.time_step_h".into(),
                value: g.time_step_h.to_string(),
                expected: format!("at most the growth duration ({} h)", g.duration_d * 24.0),
                line: None,
            });
        }
    }
}

#[cfg(test)]
mod tests {
    use crate::scenario::LoadedScenario;

    fn problems(text: &str) -> String {
        LoadedScenario::from_text(std::path::Path::new("t.toml"), text.to_string()).unwrap_err().to_string()
    }

    #[test]
    fn bad_terrain_keys_name_the_file_key_and_allowed_values() {
        let e = problems("[oxygen]\nhypoxic_threshold = 2.0\n");
        assert!(e.contains("t.toml") && e.contains("hypoxic_threshold_mmHg"), "{e}");
        let e = problems("[growth]\ncycle_time_h = 0.1\n");
        assert!(e.contains("growth.cycle_time_h") && e.contains("[1, 10000]"), "{e}");
        let e = problems("[oxygen]\nnecrotic_threshold_mmHg = 5.0\nhypoxic_threshold_mmHg = 2.0\n");
        assert!(e.contains("oxygen.necrotic_threshold_mmHg") && e.contains("at most"), "{e}");
        let e = problems("[tissue]\ntumour_mask_file = \"no-such.mask\"\n");
        assert!(e.contains("tissue.tumour_mask_file") && e.contains("no-such.mask"), "{e}");
        let e = problems("[oxygen]\nenabled = true\nblood_transport = \"along-vessels\"\n");
        assert!(e.contains("oxygen.blood_transport") && e.contains("vessels.model = \"network\""), "{e}");
        let e = problems("[tissue]\nmatrix_cv = -1.0\n");
        assert!(e.contains("tissue.matrix_cv") && e.contains(":2"), "{e}");
    }
}
