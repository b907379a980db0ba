//! What `interstice check` reports of the vessels, the blood and the plasma curves.

use crate::check::{Derived, d};
use crate::error::SimResult;
use crate::params::Params;
use crate::process::blood::{BloodSettings, build_network, flow_options, segment_walls};
use crate::scenario::{Coating, VesselModel};
use crate::tissue::Regions;
use crate::vessels::flow;
use crate::vessels::pk::{Elimination, design_rates};
use crate::vessels::pore::{BODY_TEMPERATURE, stokes_einstein, wall_coefficients};
use crate::vessels::raster::VesselRaster;

/// Appends the vessel, blood-flow and plasma lines of the check report.
pub fn derived(p: &Params, _regions: &Regions, out: &mut Vec<Derived>) -> SimResult<()> {
    let n = &p.network;
    let mu = p.blood.plasma_viscosity;
    if p.vessel_model == VesselModel::Network {
        let net = build_network(n, &p.lattice, &p.tumour, p.run.seed)?;
        let f = flow::solve(&net, &flow_options(n, &p.blood))?;
        let tumour = net.segments.iter().filter(|s| s.kind.index() == 1).count();
        out.push(d("vessels", "nodes", net.nodes.len() as f64, "1", ""));
        out.push(d("vessels", "segments", net.segments.len() as f64, "1", &format!("{tumour} tumour vessels")));
        out.push(d("vessels", "perfused fraction", f.perfused_fraction(), "1", "segments with blood flow"));
        out.push(d("vessels", "total inflow", f.total_inflow * 1e9 * 60.0, "uL/min", "blood entering the network"));
        out.push(d(
            "vessels",
            "pressure solve",
            f.iterations as f64,
            "1",
            &format!("CG iterations, residual {:.1e}", f.residual),
        ));
        let raster = VesselRaster::build(&net, &p.lattice);
        let vol = p.lattice.voxel_volume() * p.lattice.len() as f64;
        out.push(d(
            "vessels",
            "wall surface per volume",
            raster.total_area() / vol * 1e-2,
            "1/cm",
            "mean over the lattice",
        ));
        let settings = BloodSettings {
            flow: flow_options(n, &p.blood),
            network: n.clone(),
            blood: p.blood.clone(),
            starling: p.starling.clone(),
            continuum: p.continuum_vessels.clone(),
            particles: p.particles.clone(),
        };
        let walls = segment_walls(&net, &settings);
        for kind in [0usize, 1] {
            let idx: Vec<usize> = (0..net.segments.len()).filter(|&s| net.segments[s].kind.index() == kind).collect();
            if idx.is_empty() {
                continue;
            }
            let name = ["host", "tumour"][kind];
            let mean_lp = idx.iter().map(|&s| walls.lp[s]).sum::<f64>() / idx.len() as f64;
            out.push(d(
                "vessels",
                &format!("{name} mean Lp"),
                mean_lp / (1e-2 / crate::units::MMHG),
                "cm/(mmHg s)",
                "",
            ));
        }
    }
    for pp in &p.particles {
        let section = "plasma";
        let e = Elimination::of(pp, p.blood.plasma_volume())?;
        if let Elimination::Rates { .. } = e
            && pp.model == crate::scenario::PlasmaModel::Design
        {
            let (r, m) = design_rates(pp);
            out.push(d(
                section,
                &format!("{} renal clearance", pp.name),
                r * 3600.0,
                "1/h",
                "filtration below the cut-off",
            ));
            out.push(d(
                section,
                &format!("{} phagocytic clearance", pp.name),
                m * 3600.0,
                "1/h",
                match pp.coating {
                    Coating::Stealth => "stealth coating",
                    Coating::None => "bare surface",
                },
            ));
        }
        out.push(d(section, &format!("{} half-life", pp.name), e.half_life() / 3600.0, "h", "plasma amount halves"));
        out.push(d(
            section,
            &format!("{} peak concentration", pp.name),
            pp.dose as f64 / p.blood.plasma_volume() * 1e-6,
            "1/mL",
            "total dose / plasma volume (the peak of one bolus)",
        ));
    }
    for pp in &p.particles {
        let d0 = stokes_einstein(pp.hydrodynamic_radius, mu, BODY_TEMPERATURE);
        // Wall coefficients of a typical host capillary and a median tumour vessel.
        for (k, (name, r0)) in [("host", n.host_pore_radius), ("tumour", n.tumour_pore_median)].into_iter().enumerate()
        {
            let c = wall_coefficients(
                r0,
                n.pore_fraction[k],
                n.wall_thickness[k],
                pp.hydrodynamic_radius,
                d0,
                mu,
                n.hindrance,
            );
            out.push(d(
                "walls",
                &format!("{} {name} P", pp.name),
                c.permeability * 100.0,
                "cm/s",
                &format!(
                    "pore {:.0} nm, lambda {:.3}, sigma_f {:.3}, Lp {:.2e} cm/(mmHg s)",
                    r0 * 1e9,
                    c.lambda,
                    c.reflection,
                    c.lp / (1e-2 / crate::units::MMHG)
                ),
            ));
        }
    }
    Ok(())
}
