//! Delivery metrics of a run, per particle species and snapshot.
//!
//! Every amount is a number of particles; concentrations are particles per m3 of tissue.
//! A species' amount in a voxel is the sum of the compartments the run file holds for it:
//!
//! | compartment | taken from |
//! |---|---|
//! | free | field `free_<s>` |
//! | bound to cells | field `bound_<s>`, else the cell column `bound_<s>` placed in each cell's voxel |
//! | internalised | field `internalised_<s>`, else the cell column `internalised_<s>` |
//! | bound to matrix | field `matrix_bound_<s>` |
//!
//! Regions come from the `region` field: 1 is tumour, 0 host (other labels count as neither).
//!
//! - **Dose in the tumour**: percent of the injected dose (%ID) and %ID per gram of tumour,
//!   the mass being tumour volume times a tissue density (1 g/mL by default, common practice).
//!   The injected dose is the last analysed value of the series `injected_<s>` when the run
//!   records one, else `dose_particles` of the species in the resolved scenario.
//! - **AUC**: trapezoidal area under tumour %ID/g against time, percent g-1 s.
//! - **Peak and time to peak** of tumour %ID/g over the analysed snapshots.
//! - **Tumour-to-host ratio**: mean concentration in the tumour over that in the host.
//! - **Penetration profiles**: tumour voxels binned by their distance to the nearest perfused
//!   vessel wall (k-d tree over centre-line samples, [`crate::geometry::VesselDistance`]) and by
//!   their depth below the tumour surface ([`crate::geometry::depth_from_surface`]); per bin the
//!   voxel count, mean concentration of each compartment and the amount. Scalars: the
//!   amount-weighted mean distance and the distances within which 50 % and 90 % of the
//!   tumour's amount lie (d50, d90).
//! - **Perivascular index** of a compartment `q` against a distance `d` over tumour voxels:
//!   `I = 1 - (sum q_i d_i / sum q_i) / (sum d_i / N)`, the amount-weighted mean distance
//!   relative to the mean distance of the tissue. 0: spread like the tissue; positive:
//!   concentrated near the reference (1: all of it at distance 0); negative: concentrated far.
//! - **Binding-site-barrier index**: the perivascular index of the cell-bound compartment
//!   against the distance to perfused vessels (and, as a second reading, against depth below
//!   the tumour surface). High-affinity binders that saturate the first receptors they meet
//!   stay near the vessels they left: the binding-site barrier described by Fujimori, Covell,
//!   Fletcher and Weinstein (1990), "A modeling analysis of monoclonal antibody percolation
//!   through tumors: a binding-site barrier", J Nucl Med 31:1191-1198. Comparing the index of
//!   the bound compartment with that of the free one shows whether binding, not only supply,
//!   holds the particles back.
//! - **Coverage**: fraction of cancer cells (cell kind 1) whose internalised particles exceed the
//!   threshold the user gives, and that fraction over a range of thresholds (the curve).
//! - **Spread across cancer cells**: coefficient of variation (population standard deviation
//!   over mean) and Gini coefficient ([`crate::stats::gini`]) of the internalised amount and of
//!   the cell-associated amount (bound plus internalised).
//! - **Particle balance**: from the series `injected_<s>` and the stocks `plasma_<s>`,
//!   `cleared_<s>`, `free_<s>`, `bound_cells_<s>`, `bound_matrix_<s>`, `internalised_<s>`,
//!   `drained_<s>`, `left_<s>`: residual = injected - sum of the stocks present.
//! - **Fluid balance**: every series named `fluid_*`, as the run wrote it.

use std::path::PathBuf;

use indicatif::ProgressBar;

use crate::error::{AnalysisError, Result};
use crate::geometry::{Segment, VesselDistance, depth_from_surface, vessel_distances};
use crate::runfile::{Lattice, RunFile, Series, SnapshotInfo, Table};
use crate::stats::{coefficient_of_variation, gini, positive, trapezoid, weighted_quantile};

/// Grams per kilogram.
const G_PER_KG: f64 = 1000.0;

/// Default coverage threshold, internalised particles per cancer cell.
pub const DEFAULT_THRESHOLD_PARTICLES: f64 = 1000.0;
/// Default tissue density, kg/m3 (1 g/mL, common practice).
pub const DEFAULT_DENSITY_KG_PER_M3: f64 = 1000.0;

/// Choices of the analysis.
#[derive(Debug, Clone, PartialEq)]
pub struct Options {
    /// Tissue density for %ID per gram, kg/m3 (default 1000 = 1 g/mL, common practice).
    pub density_kg_per_m3: f64,
    /// Coverage threshold: internalised particles a cancer cell must exceed.
    pub threshold_particles: f64,
    /// Width of the profile bins, m (default: the voxel size).
    pub bin_width_m: Option<f64>,
    /// Species to analyse (empty: all).
    pub species: Vec<String>,
    /// Thresholds on the coverage curve.
    pub curve_points: usize,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            density_kg_per_m3: DEFAULT_DENSITY_KG_PER_M3,
            threshold_particles: DEFAULT_THRESHOLD_PARTICLES,
            bin_width_m: None,
            species: Vec::new(),
            curve_points: 41,
        }
    }
}

impl Options {
    /// Checks every option, naming the first bad one.
    pub fn check(&self) -> Result<()> {
        let t = self.threshold_particles;
        if !(t.is_finite() && t >= 0.0) {
            return Err(AnalysisError::option("threshold", t, "a finite number of particles per cell, >= 0"));
        }
        let d = self.density_kg_per_m3;
        if !(d.is_finite() && d > 0.0) {
            return Err(AnalysisError::option("density", d / 1000.0, "a finite tissue density in g/mL, > 0"));
        }
        if let Some(w) = self.bin_width_m
            && !(w.is_finite() && w > 0.0)
        {
            return Err(AnalysisError::option("bin width", w * 1e6, "a finite bin width in um, > 0"));
        }
        if self.curve_points < 2 {
            return Err(AnalysisError::option("curve points", self.curve_points, "at least 2"));
        }
        Ok(())
    }
}

/// Particles of one species in one region, per compartment (`None`: the run does not hold it).
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct Compartments {
    /// Free in the interstitial fluid.
    pub free: Option<f64>,
    /// Bound to cell receptors.
    pub bound_cells: Option<f64>,
    /// Internalised by cells.
    pub internalised: Option<f64>,
    /// Bound to the matrix.
    pub bound_matrix: Option<f64>,
}

impl Compartments {
    /// Sum of the compartments present.
    pub fn total(&self) -> f64 {
        [self.free, self.bound_cells, self.internalised, self.bound_matrix].iter().flatten().sum()
    }

    /// The compartments as (name, value).
    pub fn named(&self) -> [(&'static str, Option<f64>); 4] {
        [
            ("free", self.free),
            ("bound_cells", self.bound_cells),
            ("internalised", self.internalised),
            ("bound_matrix", self.bound_matrix),
        ]
    }
}

/// What a profile's distance is measured from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Reference {
    /// Distance to the nearest perfused vessel wall.
    Vessel,
    /// Depth below the tumour surface.
    Surface,
}

impl Reference {
    /// Short name used in tables.
    pub fn name(self) -> &'static str {
        match self {
            Reference::Vessel => "vessel",
            Reference::Surface => "surface",
        }
    }

    /// Axis label, without units.
    pub fn label(self) -> &'static str {
        match self {
            Reference::Vessel => "distance to nearest perfused vessel wall",
            Reference::Surface => "depth below tumour surface",
        }
    }
}

/// One distance bin of a profile.
#[derive(Debug, Clone, PartialEq)]
pub struct ProfileBin {
    /// Lower edge, m (inclusive).
    pub lo_m: f64,
    /// Upper edge, m (exclusive; the last bin includes its upper edge).
    pub hi_m: f64,
    /// Tumour voxels in the bin.
    pub voxels: usize,
    /// Mean concentration of every compartment together, m-3.
    pub mean_total: f64,
    /// Mean concentration per compartment (free, bound_cells, internalised, bound_matrix), m-3.
    pub mean: [Option<f64>; 4],
    /// Particles in the bin.
    pub amount: f64,
}

/// A penetration profile of one species at one snapshot.
#[derive(Debug, Clone, PartialEq)]
pub struct Profile {
    /// What the distance is measured from.
    pub reference: Reference,
    /// Bins from distance 0 outwards.
    pub bins: Vec<ProfileBin>,
    /// Amount-weighted mean distance, m.
    pub mean_distance_m: f64,
    /// Distance within which half of the amount lies, m.
    pub d50_m: f64,
    /// Distance within which 90 % of the amount lies, m.
    pub d90_m: f64,
    /// Perivascular index of all compartments together.
    pub index_total: Option<f64>,
    /// Perivascular index of the free compartment.
    pub index_free: Option<f64>,
    /// Perivascular index of the cell-bound compartment: the binding-site-barrier index.
    pub index_bound: Option<f64>,
}

/// Coverage of cancer cells at one snapshot.
#[derive(Debug, Clone, PartialEq)]
pub struct Coverage {
    /// The threshold, internalised particles per cell.
    pub threshold: f64,
    /// Cancer cells in the snapshot.
    pub cancer_cells: usize,
    /// Fraction of cancer cells above the threshold.
    pub fraction: f64,
    /// (threshold, fraction above it), thresholds ascending from 0.
    pub curve: Vec<(f64, f64)>,
}

/// How unevenly the particles are shared among cancer cells.
#[derive(Debug, Clone, PartialEq)]
pub struct Spread {
    /// Cancer cells.
    pub cancer_cells: usize,
    /// Mean internalised particles per cancer cell.
    pub mean_internalised: f64,
    /// Coefficient of variation of internalised particles.
    pub cv_internalised: f64,
    /// Gini coefficient of internalised particles.
    pub gini_internalised: f64,
    /// Coefficient of variation of bound plus internalised particles (when bound is recorded).
    pub cv_associated: Option<f64>,
    /// Gini coefficient of bound plus internalised particles.
    pub gini_associated: Option<f64>,
}

/// The particle balance of a species at one snapshot, from the series.
#[derive(Debug, Clone, PartialEq)]
pub struct Balance {
    /// Particles injected so far.
    pub injected: f64,
    /// Sum of the stocks recorded.
    pub accounted: f64,
    /// injected - accounted.
    pub residual: f64,
    /// residual / injected (NaN when nothing was injected).
    pub relative_residual: f64,
}

/// Metrics of one species at one snapshot.
#[derive(Debug, Clone, PartialEq)]
pub struct SpeciesTime {
    /// Simulated time, s.
    pub time_s: f64,
    /// Particles in the tumour.
    pub tumour: Compartments,
    /// Particles in the host tissue.
    pub host: Compartments,
    /// Tumour amount, percent of the injected dose.
    pub tumour_percent_id: Option<f64>,
    /// Tumour amount, percent of the injected dose per gram of tumour.
    pub tumour_percent_id_per_g: Option<f64>,
    /// Host amount, percent of the injected dose.
    pub host_percent_id: Option<f64>,
    /// Host amount, percent of the injected dose per gram of host tissue.
    pub host_percent_id_per_g: Option<f64>,
    /// Tumour concentration over host concentration.
    pub tumour_to_host: Option<f64>,
    /// Coverage of cancer cells.
    pub coverage: Option<Coverage>,
    /// Spread across cancer cells.
    pub spread: Option<Spread>,
    /// Profile against distance to perfused vessels.
    pub vessel_profile: Option<Profile>,
    /// Profile against depth below the tumour surface.
    pub depth_profile: Option<Profile>,
    /// Particle balance.
    pub balance: Option<Balance>,
}

/// Scalars of one species over the analysed time course.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct SpeciesSummary {
    /// AUC of tumour %ID/g, percent g-1 s.
    pub auc_percent_id_per_g_s: Option<f64>,
    /// AUC of the tumour amount, particles s.
    pub auc_particles_s: Option<f64>,
    /// Peak tumour %ID/g.
    pub peak_percent_id_per_g: Option<f64>,
    /// Time of that peak, s.
    pub time_to_peak_s: Option<f64>,
    /// Peak tumour %ID.
    pub peak_percent_id: Option<f64>,
}

/// Metrics of one species.
#[derive(Debug, Clone, PartialEq)]
pub struct SpeciesMetrics {
    /// Species name.
    pub name: String,
    /// Injected dose, particles.
    pub dose_particles: Option<f64>,
    /// Where the dose was read from.
    pub dose_source: String,
    /// One entry per analysed snapshot.
    pub times: Vec<SpeciesTime>,
    /// Time-course scalars.
    pub summary: SpeciesSummary,
}

/// Everything computed from one run file.
#[derive(Debug, Clone)]
pub struct RunMetrics {
    /// Run name.
    pub run: String,
    /// Run file.
    pub path: PathBuf,
    /// `status` of the run.
    pub status: String,
    /// Snapshot groups in the file.
    pub snapshot_groups: usize,
    /// The `finished_snapshots` attribute.
    pub finished_attr: u64,
    /// The lattice.
    pub lattice: Lattice,
    /// The options used.
    pub options: Options,
    /// Analysed snapshots.
    pub snapshots: Vec<SnapshotInfo>,
    /// Tumour volume per snapshot, m3.
    pub tumour_volume_m3: Vec<f64>,
    /// Host volume per snapshot, m3.
    pub host_volume_m3: Vec<f64>,
    /// Perfused vessel segments per snapshot (`None`: no vessel table).
    pub perfused_segments: Vec<Option<usize>>,
    /// Cancer cells per snapshot (`None`: no cell table).
    pub cancer_cells: Vec<Option<usize>>,
    /// Per species.
    pub species: Vec<SpeciesMetrics>,
    /// Every time series of the file.
    pub series: Vec<Series>,
    /// What could not be computed, and why.
    pub notes: Vec<String>,
    /// `/provenance` attributes.
    pub provenance: Vec<(String, String)>,
    /// The scenario as written.
    pub scenario_toml: Option<String>,
    /// The resolved scenario.
    pub resolved_toml: Option<String>,
    /// The caution stored in the run file.
    pub file_caution: Option<String>,
}

impl RunMetrics {
    /// Analysed times, s.
    pub fn times_s(&self) -> Vec<f64> {
        self.snapshots.iter().map(|s| s.time_s).collect()
    }

    /// The fluid-balance series (`fluid_*`).
    pub fn fluid_series(&self) -> impl Iterator<Item = &Series> {
        self.series.iter().filter(|s| s.name.starts_with("fluid_"))
    }

    /// The metrics of a species.
    pub fn species(&self, name: &str) -> Option<&SpeciesMetrics> {
        self.species.iter().find(|s| s.name == name)
    }

    fn note(&mut self, text: String) {
        if !self.notes.contains(&text) {
            self.notes.push(text);
        }
    }
}

/// Per-voxel concentrations of one species, m-3 (`None`: not recorded).
struct VoxelLoads {
    comp: [Option<Vec<f64>>; 4],
}

impl VoxelLoads {
    fn any(&self) -> bool {
        self.comp.iter().any(Option::is_some)
    }

    fn total(&self, v: usize) -> f64 {
        self.comp.iter().flatten().map(|c| c[v]).sum()
    }
}

/// Places a per-cell column into the voxels of the cells, as particles per m3.
pub(crate) fn cells_to_voxels(lattice: &Lattice, cells: &Table, column: &str) -> Option<Vec<f64>> {
    let load = cells.column(column)?;
    let voxel = cells.column("voxel")?;
    let inv = 1.0 / lattice.voxel_volume_m3();
    let mut out = vec![0.0; lattice.len()];
    for (&v, &n) in voxel.iter().zip(load) {
        let v = v as usize;
        if v < out.len() {
            out[v] += n * inv;
        }
    }
    Some(out)
}

fn sum_masked(c: &[f64], mask: &[bool]) -> f64 {
    c.iter().zip(mask).filter(|(_, m)| **m).map(|(c, _)| c).sum()
}

/// Perfused vessel segments of a snapshot's vessel table; `Err(note)` when they cannot be read.
fn perfused_segments(t: &Table) -> std::result::Result<Vec<Segment>, String> {
    let names = ["x0", "y0", "z0", "x1", "y1", "z1"];
    let mut cols = Vec::new();
    for n in names {
        cols.push(t.column(n).ok_or_else(|| format!("the vessel table has no column `{n}`"))?);
    }
    let radius = t.column("radius");
    let perfused = t.column("perfused");
    Ok((0..t.rows)
        .filter(|&r| perfused.is_none_or(|p| p[r] != 0.0))
        .map(|r| Segment {
            a: [cols[0][r], cols[1][r], cols[2][r]],
            b: [cols[3][r], cols[4][r], cols[5][r]],
            radius: radius.map_or(0.0, |c| c[r]),
        })
        .collect())
}

/// Perivascular index of weights `q` against distances `d` over the voxels where `d` is finite.
pub fn perivascular_index(d: &[f64], q: &[f64]) -> Option<f64> {
    let (mut sw, mut swd, mut sd, mut n) = (0.0, 0.0, 0.0, 0usize);
    for (&d, &q) in d.iter().zip(q) {
        if d.is_finite() {
            sw += q;
            swd += q * d;
            sd += d;
            n += 1;
        }
    }
    if n == 0 || !positive(sw) || !positive(sd) {
        return None;
    }
    Some(1.0 - (swd / sw) / (sd / n as f64))
}

fn profile(reference: Reference, dist: &[f64], loads: &VoxelLoads, bin_w: f64, vol: f64) -> Option<Profile> {
    let voxels: Vec<usize> = (0..dist.len()).filter(|&v| dist[v].is_finite()).collect();
    if voxels.is_empty() {
        return None;
    }
    let dmax = voxels.iter().map(|&v| dist[v]).fold(0.0, f64::max);
    let nbins = (dmax / bin_w).floor() as usize + 1;
    let mut count = vec![0usize; nbins];
    let mut sum_total = vec![0.0; nbins];
    let mut sum_comp = vec![[0.0; 4]; nbins];
    for &v in &voxels {
        let b = ((dist[v] / bin_w).floor() as usize).min(nbins - 1);
        count[b] += 1;
        sum_total[b] += loads.total(v);
        for (c, comp) in loads.comp.iter().enumerate() {
            if let Some(comp) = comp {
                sum_comp[b][c] += comp[v];
            }
        }
    }
    let bins = (0..nbins)
        .map(|b| {
            let n = count[b] as f64;
            ProfileBin {
                lo_m: b as f64 * bin_w,
                hi_m: (b + 1) as f64 * bin_w,
                voxels: count[b],
                mean_total: sum_total[b] / n,
                mean: [0, 1, 2, 3].map(|c| loads.comp[c].as_ref().map(|_| sum_comp[b][c] / n)),
                amount: sum_total[b] * vol,
            }
        })
        .collect();
    let d: Vec<f64> = voxels.iter().map(|&v| dist[v]).collect();
    let total: Vec<f64> = voxels.iter().map(|&v| loads.total(v)).collect();
    let wsum: f64 = total.iter().sum();
    let mean_distance_m =
        if wsum > 0.0 { d.iter().zip(&total).map(|(d, w)| d * w).sum::<f64>() / wsum } else { f64::NAN };
    let comp_index = |c: usize| {
        loads.comp[c].as_ref().and_then(|comp| {
            let w: Vec<f64> = voxels.iter().map(|&v| comp[v]).collect();
            perivascular_index(&d, &w)
        })
    };
    Some(Profile {
        reference,
        bins,
        mean_distance_m,
        d50_m: weighted_quantile(&d, &total, 0.5),
        d90_m: weighted_quantile(&d, &total, 0.9),
        index_total: perivascular_index(&d, &total),
        index_free: comp_index(0),
        index_bound: comp_index(1),
    })
}

/// Thresholds of the coverage curve: 0, then `n - 1` values log-spaced from 1 to the largest load.
pub fn curve_thresholds(max_load: f64, n: usize) -> Vec<f64> {
    let top = max_load.max(1.0);
    let mut out = vec![0.0];
    if n < 2 {
        return out;
    }
    let m = n - 1;
    for k in 0..m {
        let f = if m == 1 { 1.0 } else { k as f64 / (m - 1) as f64 };
        out.push(top.powf(f));
    }
    out.dedup();
    out
}

fn fraction_above(v: &[f64], t: f64) -> f64 {
    if v.is_empty() { f64::NAN } else { v.iter().filter(|&&x| x > t).count() as f64 / v.len() as f64 }
}

fn finite(v: f64) -> Option<f64> {
    v.is_finite().then_some(v)
}

/// Computes every metric of `run`; `progress` advances once per snapshot.
pub fn analyse(run: &RunFile, opts: &Options, progress: &ProgressBar) -> Result<RunMetrics> {
    opts.check()?;
    let snaps = run.require_snapshots()?.to_vec();
    let all_species = run.species()?;
    let species: Vec<String> = if opts.species.is_empty() {
        all_species.clone()
    } else {
        for s in &opts.species {
            if !all_species.contains(s) {
                return Err(AnalysisError::UnknownSpecies {
                    path: run.path().to_path_buf(),
                    species: s.clone(),
                    available: if all_species.is_empty() { "no species".into() } else { all_species.join(", ") },
                });
            }
        }
        opts.species.clone()
    };
    let lattice = run.lattice.clone();
    let vol = lattice.voxel_volume_m3();
    let bin_w = opts.bin_width_m.unwrap_or(lattice.voxel_size_m);
    let series = run.series()?;
    let find_series = |name: &str| series.iter().find(|s| s.name == name);

    let mut out = RunMetrics {
        run: run.name(),
        path: run.path().to_path_buf(),
        status: run.status.clone(),
        snapshot_groups: run.snapshot_groups,
        finished_attr: run.finished_attr,
        lattice: lattice.clone(),
        options: opts.clone(),
        snapshots: snaps.clone(),
        tumour_volume_m3: Vec::new(),
        host_volume_m3: Vec::new(),
        perfused_segments: Vec::new(),
        cancer_cells: Vec::new(),
        species: Vec::new(),
        series: series.clone(),
        notes: Vec::new(),
        provenance: run.provenance.clone(),
        scenario_toml: run.scenario_toml.clone(),
        resolved_toml: run.resolved_toml.clone(),
        file_caution: run.caution.clone(),
    };
    if !run.is_complete() {
        out.note(format!(
            "the run did not finish (status: {}): {} of {} snapshot groups are complete and analysed",
            run.status,
            snaps.len(),
            run.snapshot_groups
        ));
    }
    if species.is_empty() {
        out.note("the run has no particle species: delivery metrics are skipped".into());
    }

    // Doses.
    let mut metrics: Vec<SpeciesMetrics> = species
        .iter()
        .map(|s| {
            let from_series = find_series(&format!("injected_{s}"))
                .and_then(|se| se.values.iter().rev().find(|v| v.is_finite()).copied());
            let from_toml = run.particles.iter().find(|p| &p.name == s).and_then(|p| p.dose_particles);
            let (dose, source) = match (from_series, from_toml) {
                (Some(d), _) if d > 0.0 => (Some(d), format!("series injected_{s} (last analysed value)")),
                (_, Some(d)) => (Some(d), "dose_particles of the resolved scenario".to_string()),
                (Some(d), None) => (Some(d), format!("series injected_{s} (last analysed value)")),
                (None, None) => (None, "not recorded".to_string()),
            };
            SpeciesMetrics {
                name: s.clone(),
                dose_particles: dose.filter(|d| *d > 0.0),
                dose_source: source,
                times: Vec::new(),
                summary: SpeciesSummary::default(),
            }
        })
        .collect();
    for m in &metrics {
        if m.dose_particles.is_none() {
            out.note(format!("species {}: no injected dose recorded: %ID metrics are skipped", m.name));
        }
    }

    let mut prev_region: Option<Vec<f64>> = None;
    let mut depth: Option<Vec<f64>> = None;
    let mut prev_vessels: Option<Vec<Segment>> = None;
    let mut vdist: Option<Vec<f64>> = None;

    for (si, snap) in snaps.iter().enumerate() {
        let region = run.require_field(snap, "region")?.data;
        let tumour: Vec<bool> = region.iter().map(|&r| r == 1.0).collect();
        let host: Vec<bool> = region.iter().map(|&r| r == 0.0).collect();
        let nt = tumour.iter().filter(|&&t| t).count();
        let nh = host.iter().filter(|&&t| t).count();
        let (vt, vh) = (nt as f64 * vol, nh as f64 * vol);
        out.tumour_volume_m3.push(vt);
        out.host_volume_m3.push(vh);
        if nt == 0 {
            out.note(format!("snapshot {}: no tumour voxel (region 1)", snap.name));
        }

        let region_changed = prev_region.as_ref() != Some(&region);
        if region_changed {
            depth = depth_from_surface(&lattice, &tumour);
            if depth.is_none() && nt > 0 {
                out.note("the tumour fills the lattice: no surface, depth profiles are skipped".into());
            }
        }

        // Vessels.
        let vessels = run.table(snap, "vessels")?;
        let segs = match vessels.as_ref().map(perfused_segments) {
            None => {
                out.note("no vessel table (vessels/): profiles against vessel distance and the vessel binding-site-barrier index are skipped".into());
                None
            }
            Some(Err(why)) => {
                out.note(format!("{why}: profiles against vessel distance are skipped"));
                None
            }
            Some(Ok(s)) => {
                if vessels.as_ref().is_some_and(|t| t.column("perfused").is_none()) {
                    out.note("the vessel table has no `perfused` column: every segment counts as perfused".into());
                }
                Some(s)
            }
        };
        out.perfused_segments.push(segs.as_ref().map(Vec::len));
        if segs.as_ref().is_some_and(Vec::is_empty) {
            out.note(format!("snapshot {}: no perfused vessel segment", snap.name));
        }
        if region_changed || segs != prev_vessels {
            vdist = segs
                .clone()
                .and_then(|s| VesselDistance::new(s, lattice.voxel_size_m))
                .map(|vd| vessel_distances(&lattice, &vd, &tumour));
        }
        prev_vessels = segs;
        prev_region = Some(region);

        let cells = run.table(snap, "cells")?;
        if cells.is_none() {
            out.note("no cell table (cells/): coverage and spread across cells are skipped".into());
        }
        let cancer: Option<Vec<usize>> = cells.as_ref().and_then(|c| {
            let kind = c.column("kind")?;
            Some((0..c.rows).filter(|&r| kind[r] == 1.0).collect())
        });
        out.cancer_cells.push(cancer.as_ref().map(Vec::len));

        for m in metrics.iter_mut() {
            let s = m.name.clone();
            let field = |name: String| -> Result<Option<Vec<f64>>> { Ok(run.field(snap, &name)?.map(|f| f.data)) };
            let from_cells = |col: String| cells.as_ref().and_then(|c| cells_to_voxels(&lattice, c, &col));
            let loads = VoxelLoads {
                comp: [
                    field(format!("free_{s}"))?,
                    field(format!("bound_{s}"))?.or_else(|| from_cells(format!("bound_{s}"))),
                    field(format!("internalised_{s}"))?.or_else(|| from_cells(format!("internalised_{s}"))),
                    field(format!("matrix_bound_{s}"))?,
                ],
            };
            let comp_sums = |mask: &[bool]| {
                let v: Vec<Option<f64>> =
                    loads.comp.iter().map(|c| c.as_ref().map(|c| sum_masked(c, mask) * vol)).collect();
                Compartments { free: v[0], bound_cells: v[1], internalised: v[2], bound_matrix: v[3] }
            };
            let (tc, hc) = (comp_sums(&tumour), comp_sums(&host));
            if !loads.any() {
                out.note(format!(
                    "species {s}: snapshot {} holds no field or cell column for it: amounts are skipped",
                    snap.name
                ));
            }
            let pct = |amount: f64| m.dose_particles.map(|d| 100.0 * amount / d).filter(|_| loads.any());
            let per_g = |p: Option<f64>, v: f64| p.and_then(|p| finite(p / (v * opts.density_kg_per_m3 * G_PER_KG)));
            let t_pct = pct(tc.total());
            let h_pct = pct(hc.total());
            let ratio =
                if loads.any() && vt > 0.0 && vh > 0.0 { finite((tc.total() / vt) / (hc.total() / vh)) } else { None };

            // Cells.
            let (coverage, spread) = match (&cells, &cancer) {
                (Some(c), Some(idx)) => match c.column(&format!("internalised_{s}")) {
                    Some(inter) => {
                        let v: Vec<f64> = idx.iter().map(|&r| inter[r]).collect();
                        let maxv = v.iter().copied().fold(0.0, f64::max);
                        let curve = curve_thresholds(maxv, opts.curve_points)
                            .into_iter()
                            .map(|t| (t, fraction_above(&v, t)))
                            .collect();
                        let assoc: Option<Vec<f64>> =
                            c.column(&format!("bound_{s}")).map(|b| idx.iter().map(|&r| inter[r] + b[r]).collect());
                        (
                            Some(Coverage {
                                threshold: opts.threshold_particles,
                                cancer_cells: v.len(),
                                fraction: fraction_above(&v, opts.threshold_particles),
                                curve,
                            }),
                            Some(Spread {
                                cancer_cells: v.len(),
                                mean_internalised: crate::stats::mean(&v),
                                cv_internalised: coefficient_of_variation(&v),
                                gini_internalised: gini(&v),
                                cv_associated: assoc.as_ref().map(|a| coefficient_of_variation(a)),
                                gini_associated: assoc.as_ref().map(|a| gini(a)),
                            }),
                        )
                    }
                    None => {
                        out.note(format!(
                            "species {s}: the cell table has no column internalised_{s}: coverage and spread are skipped"
                        ));
                        (None, None)
                    }
                },
                (Some(_), None) => {
                    out.note("the cell table has no `kind` column: coverage is skipped".into());
                    (None, None)
                }
                _ => (None, None),
            };

            let masked = |d: &Vec<f64>| -> Vec<f64> {
                d.iter().zip(&tumour).map(|(d, t)| if *t { *d } else { f64::NAN }).collect()
            };
            let vessel_profile = if loads.any() {
                vdist.as_ref().and_then(|d| profile(Reference::Vessel, &masked(d), &loads, bin_w, vol))
            } else {
                None
            };
            let depth_profile = if loads.any() {
                depth.as_ref().and_then(|d| profile(Reference::Surface, &masked(d), &loads, bin_w, vol))
            } else {
                None
            };

            // Balance from the series.
            let at = |name: String| find_series(&name).map(|se| se.values[si]).filter(|v| v.is_finite());
            let balance = at(format!("injected_{s}")).and_then(|inj| {
                let stocks: Vec<f64> =
                    ["plasma", "cleared", "free", "bound_cells", "bound_matrix", "internalised", "drained", "left"]
                        .iter()
                        .filter_map(|k| at(format!("{k}_{s}")))
                        .collect();
                if stocks.is_empty() {
                    return None;
                }
                let acc: f64 = stocks.iter().sum();
                Some(Balance {
                    injected: inj,
                    accounted: acc,
                    residual: inj - acc,
                    relative_residual: if inj != 0.0 { (inj - acc) / inj } else { f64::NAN },
                })
            });

            m.times.push(SpeciesTime {
                time_s: snap.time_s,
                tumour: tc,
                host: hc,
                tumour_percent_id: t_pct,
                tumour_percent_id_per_g: per_g(t_pct, vt),
                host_percent_id: h_pct,
                host_percent_id_per_g: per_g(h_pct, vh),
                tumour_to_host: ratio,
                coverage,
                spread,
                vessel_profile,
                depth_profile,
                balance,
            });
        }
        progress.set_position(si as u64 + 1);
    }

    for m in metrics.iter_mut() {
        let t: Vec<f64> = m.times.iter().map(|x| x.time_s).collect();
        let pg: Option<Vec<f64>> = m.times.iter().map(|x| x.tumour_percent_id_per_g).collect();
        let amount: Vec<f64> = m.times.iter().map(|x| x.tumour.total()).collect();
        let pid: Option<Vec<f64>> = m.times.iter().map(|x| x.tumour_percent_id).collect();
        let any_data = m.times.iter().any(|x| x.tumour_percent_id.is_some() || x.tumour.total() > 0.0);
        m.summary.auc_percent_id_per_g_s = pg.as_ref().and_then(|p| trapezoid(&t, p));
        m.summary.auc_particles_s = if any_data { trapezoid(&t, &amount) } else { None };
        if let Some(p) = &pg
            && let Some((i, v)) = p.iter().enumerate().max_by(|a, b| a.1.total_cmp(b.1).then(b.0.cmp(&a.0)))
        {
            m.summary.peak_percent_id_per_g = Some(*v);
            m.summary.time_to_peak_s = Some(t[i]);
        }
        m.summary.peak_percent_id = pid.as_ref().and_then(|p| p.iter().copied().reduce(f64::max));
    }
    out.species = metrics;
    Ok(out)
}
