//! Distances of voxels to the nearest perfused vessel and to the tumour surface.

use crate::kdtree::KdTree;
use crate::runfile::Lattice;

/// A straight vessel segment: centre-line end points and radius, m.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Segment {
    /// One end of the centre line, m.
    pub a: [f64; 3],
    /// The other end, m.
    pub b: [f64; 3],
    /// Lumen radius, m.
    pub radius: f64,
}

/// Distance from point `p` to the line segment `a`-`b` (closest point by clamped projection).
pub fn point_segment_distance(p: [f64; 3], a: [f64; 3], b: [f64; 3]) -> f64 {
    let ab = [b[0] - a[0], b[1] - a[1], b[2] - a[2]];
    let ap = [p[0] - a[0], p[1] - a[1], p[2] - a[2]];
    let len2 = ab[0] * ab[0] + ab[1] * ab[1] + ab[2] * ab[2];
    let t = if len2 > 0.0 { ((ap[0] * ab[0] + ap[1] * ab[1] + ap[2] * ab[2]) / len2).clamp(0.0, 1.0) } else { 0.0 };
    let c = [a[0] + t * ab[0], a[1] + t * ab[1], a[2] + t * ab[2]];
    ((p[0] - c[0]).powi(2) + (p[1] - c[1]).powi(2) + (p[2] - c[2]).powi(2)).sqrt()
}

/// Distance to the nearest vessel wall, through a k-d tree over centre-line samples.
///
/// The wall distance of a point is `max(0, min over segments of (centre-line distance minus
/// radius))`. The tree holds samples spaced at most `spacing` apart along every centre line;
/// the nearest sample gives an upper bound `U` (the exact wall distance of its segment), and
/// every segment that could beat it has a sample within `U + r_max + spacing / 2`, so the
/// segments of the samples in that ball are measured exactly. The result is therefore exact,
/// not an approximation of the sampling.
#[derive(Debug, Clone)]
pub struct VesselDistance {
    tree: KdTree,
    sample_segment: Vec<u32>,
    segments: Vec<Segment>,
    spacing: f64,
    r_max: f64,
}

impl VesselDistance {
    /// Builds the search structure; `None` when there is no segment.
    pub fn new(segments: Vec<Segment>, spacing: f64) -> Option<VesselDistance> {
        if segments.is_empty() {
            return None;
        }
        let spacing = if spacing > 0.0 && spacing.is_finite() { spacing } else { 1e-6 };
        let mut pts = Vec::new();
        let mut sample_segment = Vec::new();
        for (s, seg) in segments.iter().enumerate() {
            let len = point_segment_distance(seg.b, seg.a, seg.a);
            let n = ((len / spacing).ceil() as usize).max(1);
            for k in 0..=n {
                let t = k as f64 / n as f64;
                pts.push([0, 1, 2].map(|d| seg.a[d] + t * (seg.b[d] - seg.a[d])));
                sample_segment.push(s as u32);
            }
        }
        let r_max = segments.iter().map(|s| s.radius).fold(0.0, f64::max);
        Some(VesselDistance { tree: KdTree::new(&pts), sample_segment, segments, spacing, r_max })
    }

    /// Number of segments.
    pub fn segments(&self) -> usize {
        self.segments.len()
    }

    fn wall(&self, s: usize, p: [f64; 3]) -> f64 {
        let seg = &self.segments[s];
        point_segment_distance(p, seg.a, seg.b) - seg.radius
    }

    /// Distance from `p` to the nearest vessel wall, m (0 inside a lumen).
    pub fn wall_distance(&self, p: [f64; 3]) -> f64 {
        let Some((i, _)) = self.tree.nearest(p) else { return f64::NAN };
        let mut best = self.wall(self.sample_segment[i] as usize, p);
        // Never negative: `best >= -radius of its segment >= -r_max`; widened for rounding.
        let r = (best + self.r_max + 0.5 * self.spacing) * (1.0 + 1e-9) + 1e-15;
        let mut seen: Vec<u32> = Vec::new();
        self.tree.within(p, r, |j, _| {
            let s = self.sample_segment[j];
            if !seen.contains(&s) {
                seen.push(s);
            }
        });
        for s in seen {
            best = best.min(self.wall(s as usize, p));
        }
        best.max(0.0)
    }
}

/// Centres of the faces between tumour voxels and non-tumour voxels inside the lattice.
///
/// Faces on the outer boundary of the lattice are not tumour surface: the lattice may cut
/// through a tumour.
pub fn surface_points(lattice: &Lattice, tumour: &[bool]) -> Vec<[f64; 3]> {
    let [nx, ny, nz] = lattice.shape_xyz;
    let h = lattice.voxel_size_m;
    let mut out = Vec::new();
    for k in 0..nz {
        for j in 0..ny {
            for i in 0..nx {
                let v = lattice.index([i, j, k]);
                let c = lattice.centre([i, j, k]);
                let ijk = [i, j, k];
                for a in 0..3 {
                    // Face between this voxel and its +a neighbour.
                    if ijk[a] + 1 >= lattice.shape_xyz[a] {
                        continue;
                    }
                    let mut n = ijk;
                    n[a] += 1;
                    if tumour[v] != tumour[lattice.index(n)] {
                        let mut f = c;
                        f[a] += 0.5 * h;
                        out.push(f);
                    }
                }
            }
        }
    }
    out
}

/// Depth of every tumour voxel below the tumour surface: distance from its centre to the nearest
/// tumour/host face centre, m. Host voxels get NaN; `None` when the tumour has no surface inside
/// the lattice (no tumour, or tumour everywhere).
pub fn depth_from_surface(lattice: &Lattice, tumour: &[bool]) -> Option<Vec<f64>> {
    let faces = surface_points(lattice, tumour);
    if faces.is_empty() {
        return None;
    }
    let tree = KdTree::new(&faces);
    Some(
        (0..lattice.len())
            .map(|v| {
                if tumour[v] {
                    tree.nearest(lattice.centre(lattice.ijk(v))).map_or(f64::NAN, |(_, d2)| d2.sqrt())
                } else {
                    f64::NAN
                }
            })
            .collect(),
    )
}

/// Wall distance of every voxel where `mask` holds (NaN elsewhere).
pub fn vessel_distances(lattice: &Lattice, vessels: &VesselDistance, mask: &[bool]) -> Vec<f64> {
    (0..lattice.len())
        .map(|v| if mask[v] { vessels.wall_distance(lattice.centre(lattice.ijk(v))) } else { f64::NAN })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn lcg(seed: &mut u64) -> f64 {
        // Knuth's MMIX linear congruential generator (The Art of Computer Programming, vol. 2).
        *seed = seed.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
        (*seed >> 11) as f64 / (1u64 << 53) as f64
    }

    // Outside reference: brute force over every segment.
    #[test]
    fn wall_distance_matches_brute_force_over_segments() {
        let mut s = 42u64;
        let segs: Vec<Segment> = (0..40)
            .map(|_| Segment {
                a: [lcg(&mut s), lcg(&mut s), lcg(&mut s)],
                b: [lcg(&mut s), lcg(&mut s), lcg(&mut s)],
                radius: 0.01 + 0.05 * lcg(&mut s),
            })
            .collect();
        let vd = VesselDistance::new(segs.clone(), 0.03).unwrap();
        for _ in 0..2000 {
            let p = [lcg(&mut s) * 1.2 - 0.1, lcg(&mut s) * 1.2 - 0.1, lcg(&mut s) * 1.2 - 0.1];
            let brute =
                segs.iter().map(|g| point_segment_distance(p, g.a, g.b) - g.radius).fold(f64::INFINITY, f64::min);
            assert_eq!(vd.wall_distance(p), brute.max(0.0), "{p:?}");
        }
    }

    // Known answer by hand: distance to a segment along x.
    #[test]
    fn point_segment_distance_by_hand() {
        let (a, b) = ([0.0, 0.0, 0.0], [2.0, 0.0, 0.0]);
        assert_eq!(point_segment_distance([1.0, 3.0, 4.0], a, b), 5.0);
        assert_eq!(point_segment_distance([-3.0, 4.0, 0.0], a, b), 5.0);
        assert_eq!(point_segment_distance([5.0, 0.0, 4.0], a, b), 5.0);
        assert_eq!(point_segment_distance([1.0, 1.0, 1.0], a, a), 3f64.sqrt());
    }

    // Known answer by hand: a slab tumour x < m h has depth (m - i - 0.5) h at voxel column i.
    #[test]
    fn slab_tumour_depth_by_hand() {
        let l = Lattice { shape_xyz: [10, 3, 2], voxel_size_m: 2.0, origin_m: [1.0, 0.0, 0.0] };
        let tumour: Vec<bool> = (0..l.len()).map(|v| l.ijk(v)[0] < 6).collect();
        let d = depth_from_surface(&l, &tumour).unwrap();
        for (v, &dv) in d.iter().enumerate() {
            let i = l.ijk(v)[0];
            if i < 6 {
                assert_eq!(dv, (6.0 - i as f64 - 0.5) * 2.0);
            } else {
                assert!(dv.is_nan());
            }
        }
        assert!(depth_from_surface(&l, &vec![true; l.len()]).is_none());
    }
}
