//! Derived quantities a modeller wants before spending compute: lattice size, memory estimate,
//! time step, and the dimensionless numbers of each process.

use crate::params::Params;
use crate::scenario::LoadedScenario;

/// One line of the check report.
#[derive(Debug, Clone)]
pub struct Derived {
    pub section: &'static str,
    pub name: String,
    pub value: f64,
    pub units: &'static str,
    pub note: String,
}

pub(crate) fn d(section: &'static str, name: &str, value: f64, units: &'static str, note: &str) -> Derived {
    Derived { section, name: name.to_string(), value, units, note: note.to_string() }
}

/// Computes the check report of a scenario (builds the vessel network of the network model,
/// which can fail on a bad network file).
pub fn derived(loaded: &LoadedScenario) -> crate::error::SimResult<Vec<Derived>> {
    let mut p = Params::resolve_loaded(loaded);
    let regions = crate::terrain::generator::regions(&mut p)?;
    let l = &p.lattice;
    let mut out = Vec::new();
    let n = l.len() as f64;
    let e = l.extent();
    out.push(d("lattice", "voxels", n, "1", &format!("{} x {} x {}", l.n[0], l.n[1], l.n[2])));
    out.push(d("lattice", "voxel edge", l.h * 1e6, "um", ""));
    out.push(d(
        "lattice",
        "box",
        e[0] * 1e3,
        "mm",
        &format!("{:.3} x {:.3} x {:.3} mm", e[0] * 1e3, e[1] * 1e3, e[2] * 1e3),
    ));
    let tv = regions.tumour_voxels() as f64;
    out.push(d("tumour", "tumour voxels", tv, "1", &format!("{:.1} % of the lattice", 100.0 * tv / n)));
    out.push(d("tumour", "tumour volume", tv * l.voxel_volume() * 1e9, "mm^3", "voxel count times voxel volume"));
    out.push(d("tumour", "equivalent radius", p.tumour.equivalent_radius() * 1e6, "um", ""));
    let cells = tv * p.cells.occupancy[1] + (n - tv) * p.cells.occupancy[0];
    out.push(d("cells", "expected cells", cells, "1", "occupancy times voxels"));
    // Memory: f64 fields and u8 labels per voxel, cells as entities with their components.
    let field_bytes = n * (8.0 * FIELDS_F64 as f64 + 1.0);
    let cell_bytes = cells * CELL_BYTES;
    let pressure_bytes = crate::process::pressure::memory_estimate(l.n);
    out.push(d("memory", "fields", field_bytes / 1e6, "MB", &format!("{FIELDS_F64} f64 fields and 1 label field")));
    out.push(d("memory", "cells", cell_bytes / 1e6, "MB", "entities with kind, voxel, receptors and loads"));
    out.push(d(
        "memory",
        "interstitial fluid",
        pressure_bytes / 1e6,
        "MB",
        "pressure and flow fields, face fluxes, assembled system and multigrid solver",
    ));
    out.push(d(
        "memory",
        "total estimate",
        (field_bytes + cell_bytes + pressure_bytes) / 1e6,
        "MB",
        "excluding packets",
    ));
    fluid_checks(&p, &mut out);
    crate::terrain::check_lines(&p, &mut out);
    particle_lines(&p, &mut out);
    dose_lines(&p, &mut out);
    let steps = (p.run.end_time / p.run.time_step).ceil();
    out.push(d("time", "time step", p.run.time_step, "s", "requested"));
    out.push(d("time", "steps", steps, "1", "at the requested step"));
    out.push(d("time", "snapshots", (p.run.end_time / p.run.snapshot_interval).ceil() + 1.0, "1", "including t = 0"));
    crate::vessels::check::derived(&p, &regions, &mut out)?;
    intervention_lines(&p, &mut out);
    Ok(out)
}

/// Each intervention's start, end and the number of updates it brings.
fn intervention_lines(p: &Params, out: &mut Vec<Derived>) {
    let descr = crate::process::interventions::describe(&p.interventions);
    for (iv, text) in p.interventions.iter().zip(descr) {
        let updates = iv.update_times(p.run.end_time).len() as f64;
        let note = text.split_once(' ').map_or(text.clone(), |(_, rest)| rest.to_string());
        out.push(dd("interventions", &format!("{}: updates", iv.name), updates, "1", &note));
        if let crate::process::interventions::Action::Degradation { rate, enzyme_half_life, .. } = iv.action {
            let total = iv.level(iv.end.unwrap_or(p.run.end_time));
            out.push(dd(
                "interventions",
                &format!("{}: fibres left", iv.name),
                (-total).exp(),
                "1",
                &format!(
                    "exp(-k tau (1 - exp(-T/tau))), k = {:.3e} 1/s, tau = {:.3e} s",
                    rate,
                    enzyme_half_life / std::f64::consts::LN_2
                ),
            ));
        }
    }
}

/// The interstitial fluid numbers of Baxter and Jain 1989 (Microvasc Res 37:77): for a uniform
/// spherical tumour of radius `R` without working lymphatics, `alpha = R sqrt((Lp S/V) / K)`;
/// the pressure is flat near `pe = p_v - sigma_T (pi_v - pi_i)` inside and drops to the rim over
/// the length `R / alpha = sqrt(K / (Lp S/V))`, with `p(0) = pe (1 - alpha / sinh alpha)` when
/// `p(R) = 0`.
fn fluid_checks(p: &Params, out: &mut Vec<Derived>) {
    use crate::units::{MMHG, cm2_per_mmhg_s};
    let k = |r: usize| match p.fluid.conductivity {
        crate::scenario::ConductivityModel::Table => p.fluid.region_conductivity[r],
        crate::scenario::ConductivityModel::Matrix => crate::process::pressure::matrix_conductivity(
            p.matrix.collagen_fraction[r],
            p.matrix.gag_fraction[r],
            p.matrix.collagen_fibre_radius,
            p.matrix.gag_fibre_radius,
            p.fluid.viscosity,
        ),
    };
    let per_cgs = 1.0 / cm2_per_mmhg_s(1.0);
    let model = match p.fluid.conductivity {
        crate::scenario::ConductivityModel::Table => "from the [fluid] table",
        crate::scenario::ConductivityModel::Matrix => "Jackson-James 1986 from the matrix fractions",
    };
    for (r, name) in [(0, "host"), (1, "tumour")] {
        out.push(d(
            "fluid",
            &format!("K {name}"),
            k(r) * per_cgs,
            "cm2/(mmHg s)",
            &format!("{model}; {:.3e} m^2/(Pa s)", k(r)),
        ));
    }
    let network = p.vessel_model == crate::scenario::VesselModel::Network;
    let note = if network { " (continuum values; the network model sets its own)" } else { "" };
    let c = &p.continuum_vessels;
    let lps_v = |r: usize| c.wall_conductivity[r] * c.surface_per_volume[r];
    let pe = |r: usize| c.vascular_pressure - p.starling.oncotic_term(r);
    out.push(d(
        "fluid",
        "effective pressure pe tumour",
        pe(1) / MMHG,
        "mmHg",
        &format!("p_v - sigma_T (pi_v - pi_i){note}"),
    ));
    let radius = p.tumour.equivalent_radius();
    if lps_v(1) > 0.0 {
        let width = (k(1) / lps_v(1)).sqrt();
        let alpha = radius / width;
        out.push(d(
            "fluid",
            "alpha",
            alpha,
            "1",
            &format!("R sqrt((Lp S/V) / K) with R = {:.1} um{note}", radius * 1e6),
        ));
        out.push(d(
            "fluid",
            "pressure drop width at rim",
            width * 1e6,
            "um",
            &format!("R / alpha: e-folding width of the drop at the rim; {:.1} voxels", width / p.lattice.h),
        ));
        if width < 2.0 * p.lattice.h {
            out.push(d(
                "fluid",
                "rim resolution",
                width / p.lattice.h,
                "voxels",
                "under 2 voxels: the rim is not resolved",
            ));
        }
        let centre = if alpha > 700.0 { pe(1) } else { pe(1) * (1.0 - alpha / alpha.sinh()) };
        out.push(d(
            "fluid",
            "centre pressure",
            centre / MMHG,
            "mmHg",
            "pe (1 - alpha / sinh alpha), p(R) = 0, no tumour lymphatics",
        ));
    }
    let lym = p.lymphatics.drainage[0];
    let denom = lps_v(0) + lym;
    if denom > 0.0 {
        let host = (lps_v(0) * pe(0) + lym * p.lymphatics.pressure) / denom;
        out.push(d(
            "fluid",
            "host equilibrium pressure",
            host / MMHG,
            "mmHg",
            "(Lp S/V pe + LpL SL/V p_L) / (Lp S/V + LpL SL/V), host",
        ));
    }
}

/// Per design: diffusion, hindrance, binding numbers and the time step the walk needs.
fn particle_lines(p: &Params, out: &mut Vec<Derived>) {
    use crate::process::binding::Kinetics;
    use crate::process::transport::matrix_hindrance;
    let kin = Kinetics::build(&p.designs, &p.binding);
    let h = p.lattice.h;
    for (s, d) in p.designs.0.iter().enumerate() {
        let name = d.name.as_str();
        let sec = "particles";
        out.push(dd(sec, &format!("{name}: D0"), d.d0, "m2/s", "Stokes-Einstein in interstitial fluid"));
        let mut d_region = [0.0; 2];
        for (r, region) in ["host", "tumour"].iter().enumerate() {
            let (ratio, part) =
                matrix_hindrance(&p.transport, d.radius, p.matrix.collagen_fraction[r], p.matrix.gag_fraction[r]);
            d_region[r] = d.d0 * ratio;
            out.push(dd(sec, &format!("{name}: D/D0 {region}"), ratio, "1", "matrix hindrance"));
            out.push(dd(sec, &format!("{name}: partition {region}"), part, "1", "accessible fraction of the fluid"));
        }
        let dmax = d_region[0].max(d_region[1]);
        // A fine sub-step keeps sqrt(6 D dt) within 3/4 of the largest move.
        let lmax = p.transport.max_step_voxels * h;
        let dt1 = 0.5625 * lmax * lmax / (6.0 * dmax);
        out.push(dd(
            sec,
            &format!("{name}: step without sub-steps"),
            dt1,
            "s",
            "largest dt walked in one fine sub-step",
        ));
        out.push(dd(
            sec,
            &format!("{name}: fine sub-steps per step"),
            (p.run.time_step / dt1).ceil().max(1.0),
            "1",
            "where D is largest and varies around the packet; uniform parts take longer steps",
        ));
        let k = &kin.species[s];
        if let Some(l) = &d.ligand {
            let receptors = match l.target {
                crate::scenario::ReceptorTarget::Cancer => p.cells.receptors[1] * p.cells.occupancy[1],
                crate::scenario::ReceptorTarget::Host => p.cells.receptors[0] * p.cells.occupancy[0],
            };
            let vacc = p.matrix.porosity[1] * p.lattice.voxel_volume();
            let k_capture = k.kon_eff * receptors / vacc;
            let pen = (d_region[1] / k_capture).sqrt();
            out.push(dd(
                sec,
                &format!("{name}: capture rate"),
                k_capture,
                "1/s",
                "valency kon R / V_acc in the tumour",
            ));
            out.push(dd(sec, &format!("{name}: penetration length"), pen, "m", "sqrt(D / capture rate), tumour"));
            out.push(dd(
                sec,
                &format!("{name}: binding Damkohler"),
                k_capture * h * h / d_region[1],
                "1",
                "capture rate x voxel diffusion time h^2/D",
            ));
            let koff = k.koff_eff(receptors.max(1.0), p.binding.cell_area, p.binding.ligand_reach);
            out.push(dd(sec, &format!("{name}: effective koff"), koff, "1/s", "with avidity of its valency"));
        }
        if k.phagocytosis > 0.0 {
            out.push(dd(sec, &format!("{name}: phagocyte uptake"), k.phagocytosis, "1/s", "in a phagocyte's voxel"));
        }
    }
}

/// Per design: the total dose, then each bolus and infusion of its schedule with its times.
fn dose_lines(p: &Params, out: &mut Vec<Derived>) {
    for pp in &p.particles {
        let sch = &pp.schedule;
        let times = sch.breakpoints().len();
        let note = format!(
            "{} bolus(es), {} infusion(s); {} dose time(s) after t = 0, each the end of a step",
            sch.boluses.len(),
            sch.infusions.len(),
            times
        );
        out.push(d("dosing", &format!("{}: total dose", pp.name), pp.dose as f64, "1", &note));
        for (what, n, when) in sch.describe() {
            out.push(d("dosing", &format!("{}: {what}", pp.name), n as f64, "1", &when));
        }
    }
}

fn dd(section: &'static str, name: &str, value: f64, units: &'static str, note: &str) -> Derived {
    d(section, name, value, units, note)
}

/// f64 fields held per voxel by the engine's resources at this stage.
const FIELDS_F64: usize = 3;
/// Approximate bytes of one cell entity.
const CELL_BYTES: f64 = 200.0;

/// Renders the report as aligned text.
pub fn render(rows: &[Derived]) -> String {
    let mut s = String::new();
    let mut section = "";
    for r in rows {
        if r.section != section {
            section = r.section;
            s.push_str(&format!("[{section}]\n"));
        }
        s.push_str(&format!("  {:<36} {:>14.6e} {:<8} {}\n", r.name, r.value, r.units, r.note));
    }
    s
}
