//! The tissue generator: tumour region (shape from `[tumour]` or a mask file), matrix, cells
//! (cancer, stromal, phagocyte, host) and the spatially correlated heterogeneity of matrix
//! density, receptor expression and tumour vessel density.
//!
//! Each heterogeneity is a log-normal factor of mean 1 and coefficient of variation `cv`
//! ([`super::random_field::lognormal`] of a Gaussian field of correlation length `l`, spectral
//! synthesis as in [`super::random_field`]), drawn from its own stream of the run seed:
//!
//! - matrix: collagen and glycosaminoglycan fractions of every voxel times the factor (stromal
//!   bands of dense matrix), clamped to 0.5;
//! - receptors: the receptors of each cell times the factor at its voxel (clonal patches);
//! - vessel density: each generated tumour vessel segment survives with probability
//!   `min(1, f)` at its midpoint, so where `f < 1` the vessels thin out (the network model only;
//!   the factor cannot add vessels beyond the generator's own density).
//!
//! Mask file format (our own): raw bytes, one per voxel in lattice order (x fastest, then y,
//! then z), exactly `nx * ny * nz` bytes, each 0 (host) or 1 (tumour). The vessel generator's
//! rim and core rules, and the depth rule of lymphatic collapse, then use the ellipsoid of the
//! mask's bounding box.

use bevy_ecs::prelude::*;

use super::random_field::{gaussian_field, lognormal};
use crate::error::{SimError, SimResult};
use crate::field::Field;
use crate::lattice::Lattice;
use crate::params::{Params, TumourGeometry};
use crate::scenario::Scenario;
use crate::tissue::{Matrix, Regions, TUMOUR};
use crate::units::UM;

/// Stream ids of the heterogeneity fields (distinct from any other use of `gaussian_field`).
const FIELD_MATRIX: u64 = 101;
const FIELD_RECEPTORS: u64 = 102;
const FIELD_VESSELS: u64 = 103;

/// One log-normal heterogeneity: coefficient of variation and correlation length (m).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Heterogeneity {
    pub cv: f64,
    pub correlation_length: f64,
}

/// The tissue generator's settings in SI.
#[derive(Resource, Debug, Clone, PartialEq)]
pub struct TissueParams {
    /// Mask file (resolved against the scenario's folder), or `None` for the `[tumour]` shape.
    pub mask_file: Option<std::path::PathBuf>,
    /// Fraction of tumour cells that are stromal.
    pub stromal_fraction: f64,
    pub matrix: Heterogeneity,
    pub receptors: Heterogeneity,
    pub vessel_density: Heterogeneity,
}

impl TissueParams {
    /// From a validated scenario; paths resolved against `file`'s folder.
    pub fn resolve(s: &Scenario, file: Option<&std::path::Path>) -> Self {
        let t = &s.tissue;
        let h = |cv: f64, l_um: f64| Heterogeneity { cv, correlation_length: l_um * UM };
        TissueParams {
            mask_file: (!t.tumour_mask_file.is_empty())
                .then(|| crate::scenario::scenario_relative(file, &t.tumour_mask_file)),
            stromal_fraction: t.tumour_stromal_fraction,
            matrix: h(t.matrix_cv, t.matrix_correlation_um),
            receptors: h(t.receptor_cv, t.receptor_correlation_um),
            vessel_density: h(t.vessel_density_cv, t.vessel_density_correlation_um),
        }
    }
}

/// The heterogeneity factors of the run (mean 1; all ones where a field is switched off).
#[derive(Resource, Debug, Clone)]
pub struct TerrainFactors {
    pub matrix: Field,
    pub receptors: Field,
    pub vessel_density: Field,
}

/// A log-normal factor of mean 1 on the lattice, or ones when `cv` is 0.
pub fn factor_field(
    l: &Lattice,
    h: Heterogeneity,
    seed: u64,
    stream_id: u64,
    name: &'static str,
    description: &'static str,
) -> Field {
    let mut f = Field::filled(name, "1", description, l.len(), 1.0);
    if h.cv > 0.0 {
        f.data = lognormal(&gaussian_field(l, h.correlation_length, seed, stream_id), 1.0, h.cv);
    }
    f
}

impl TerrainFactors {
    /// Draws the three factors of a run.
    pub fn draw(l: &Lattice, p: &TissueParams, seed: u64) -> Self {
        TerrainFactors {
            matrix: factor_field(l, p.matrix, seed, FIELD_MATRIX, "matrix_factor", "factor on matrix density"),
            receptors: factor_field(
                l,
                p.receptors,
                seed,
                FIELD_RECEPTORS,
                "receptor_factor",
                "factor on receptor expression",
            ),
            vessel_density: factor_field(
                l,
                p.vessel_density,
                seed,
                FIELD_VESSELS,
                "vessel_density_factor",
                "factor on tumour vessel density",
            ),
        }
    }
}

/// Reads a tumour mask (see the module documentation) into region labels.
pub fn read_mask(path: &std::path::Path, l: &Lattice) -> SimResult<Regions> {
    let bytes =
        std::fs::read(path).map_err(SimError::io(path, "cannot read the tumour mask (tissue.tumour_mask_file)"))?;
    if bytes.len() != l.len() {
        return Err(SimError::Input {
            path: path.to_path_buf(),
            what: format!(
                "tissue.tumour_mask_file: {} bytes, expected exactly {} (one byte per voxel of the {} x {} x {} lattice)",
                bytes.len(),
                l.len(),
                l.n[0],
                l.n[1],
                l.n[2]
            ),
        });
    }
    if let Some(pos) = bytes.iter().position(|&b| b > 1) {
        let [i, j, k] = l.ijk(pos);
        return Err(SimError::Input {
            path: path.to_path_buf(),
            what: format!(
                "tissue.tumour_mask_file: byte {pos} (voxel {i}, {j}, {k}) is {}, expected 0 (host) or 1 (tumour)",
                bytes[pos]
            ),
        });
    }
    if !bytes.contains(&TUMOUR) {
        return Err(SimError::Input {
            path: path.to_path_buf(),
            what: "tissue.tumour_mask_file: no voxel is tumour (1)".into(),
        });
    }
    let mut region = Field::filled("region", "1", "0 host tissue, 1 tumour", l.len(), 0u8);
    region.data = bytes;
    Ok(Regions { region })
}

/// The ellipsoid of the bounding box of the tumour voxels.
pub fn bounding_ellipsoid(l: &Lattice, regions: &Regions) -> TumourGeometry {
    let mut lo = [usize::MAX; 3];
    let mut hi = [0usize; 3];
    for (v, &r) in regions.region.data.iter().enumerate() {
        if r == TUMOUR {
            let c = l.ijk(v);
            for a in 0..3 {
                lo[a] = lo[a].min(c[a]);
                hi[a] = hi[a].max(c[a]);
            }
        }
    }
    let centre = [0, 1, 2].map(|a| l.origin[a] + 0.5 * (lo[a] + hi[a] + 1) as f64 * l.h);
    let semi_axes = [0, 1, 2].map(|a| 0.5 * (hi[a] + 1 - lo[a]) as f64 * l.h);
    TumourGeometry { centre, semi_axes }
}

/// The regions of a run: from the mask when there is one (and `params.tumour` then becomes its
/// bounding ellipsoid), otherwise from the tumour shape.
pub fn regions(params: &mut Params) -> SimResult<Regions> {
    match &params.tissue.mask_file {
        Some(path) => {
            let r = read_mask(path, &params.lattice)?;
            params.tumour = bounding_ellipsoid(&params.lattice, &r);
            Ok(r)
        }
        None => Ok(Regions::from_geometry(&params.lattice, &params.tumour)),
    }
}

/// Matrix of the regions with the matrix factor applied (fractions clamped to 0.5).
pub fn matrix(regions: &Regions, p: &crate::params::MatrixParams, factors: &TerrainFactors) -> Matrix {
    let mut m = Matrix::from_regions(regions, p);
    for (v, &f) in factors.matrix.data.iter().enumerate() {
        m.collagen.data[v] = (m.collagen.data[v] * f).min(0.5);
        m.gag.data[v] = (m.gag.data[v] * f).min(0.5);
    }
    m
}

/// Thins the tumour vessels of a generated network by the vessel density factor: a tumour
/// segment survives with probability `min(1, f)` at its midpoint (stream per segment).
pub fn thin_tumour_vessels(net: &mut crate::vessels::Network, l: &Lattice, factors: &TerrainFactors, seed: u64) {
    let before = std::mem::take(&mut net.segments);
    for (s, seg) in before.into_iter().enumerate() {
        let (a, b) = (net.nodes[seg.a as usize], net.nodes[seg.b as usize]);
        let mid = [0, 1, 2].map(|k| 0.5 * (a[k] + b[k]));
        let f = l.voxel_of(mid).map_or(1.0, |c| factors.vessel_density.data[l.idx(c[0], c[1], c[2])]);
        let keep = seg.kind != crate::vessels::network::VesselKind::Tumour
            || f >= 1.0
            || crate::rng::stream(seed, crate::rng::Domain::Tissue, (FIELD_VESSELS << 40) | s as u64, 1).uniform() < f;
        if keep {
            net.segments.push(seg);
        }
    }
    net.drop_unused_nodes();
    net.touch();
}

#[cfg(test)]
mod tests;
