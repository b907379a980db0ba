//! A static k-d tree over 3D points: exact nearest-neighbour and fixed-radius queries.
//!
//! Bentley (1975), "Multidimensional binary search trees used for associative searching",
//! Communications of the ACM 18(9):509-517. The tree is implicit: the points are permuted so
//! that each subrange `[lo, hi)` stores its splitting point at `mid = (lo + hi) / 2`, the points
//! before it on the low side of the splitting plane and those after it on the high side. Each
//! node splits along the axis in which its points spread most.

/// A k-d tree over a fixed set of points.
#[derive(Debug, Clone)]
pub struct KdTree {
    points: Vec<[f64; 3]>,
    ids: Vec<u32>,
    axis: Vec<u8>,
}

impl KdTree {
    /// Builds the tree over `points`; queries return indices into this slice.
    pub fn new(points: &[[f64; 3]]) -> KdTree {
        assert!(points.len() < u32::MAX as usize, "too many points for the k-d tree");
        let mut ids: Vec<u32> = (0..points.len() as u32).collect();
        let mut axis = vec![0u8; points.len()];
        build(points, &mut ids, &mut axis);
        let points = ids.iter().map(|&i| points[i as usize]).collect();
        KdTree { points, ids, axis }
    }

    /// Number of points.
    pub fn len(&self) -> usize {
        self.points.len()
    }

    /// True for a tree without points.
    pub fn is_empty(&self) -> bool {
        self.points.is_empty()
    }

    /// The nearest point to `q`: (its index, squared distance); `None` for an empty tree.
    pub fn nearest(&self, q: [f64; 3]) -> Option<(usize, f64)> {
        if self.points.is_empty() {
            return None;
        }
        let mut best = (usize::MAX, f64::INFINITY);
        self.nearest_in(0, self.points.len(), q, &mut best);
        Some((self.ids[best.0] as usize, best.1))
    }

    fn nearest_in(&self, lo: usize, hi: usize, q: [f64; 3], best: &mut (usize, f64)) {
        if lo >= hi {
            return;
        }
        let mid = (lo + hi) / 2;
        let p = self.points[mid];
        let d2 = dist2(p, q);
        if d2 < best.1 {
            *best = (mid, d2);
        }
        let a = self.axis[mid] as usize;
        let diff = q[a] - p[a];
        let (near, far) = if diff < 0.0 { ((lo, mid), (mid + 1, hi)) } else { ((mid + 1, hi), (lo, mid)) };
        self.nearest_in(near.0, near.1, q, best);
        if diff * diff < best.1 {
            self.nearest_in(far.0, far.1, q, best);
        }
    }

    /// Calls `f(index, squared distance)` for every point within distance `r` of `q` (inclusive).
    pub fn within(&self, q: [f64; 3], r: f64, mut f: impl FnMut(usize, f64)) {
        let r2 = r * r;
        self.within_in(0, self.points.len(), q, r2, &mut f);
    }

    fn within_in(&self, lo: usize, hi: usize, q: [f64; 3], r2: f64, f: &mut impl FnMut(usize, f64)) {
        if lo >= hi {
            return;
        }
        let mid = (lo + hi) / 2;
        let p = self.points[mid];
        let d2 = dist2(p, q);
        if d2 <= r2 {
            f(self.ids[mid] as usize, d2);
        }
        let a = self.axis[mid] as usize;
        let diff = q[a] - p[a];
        if diff < 0.0 || diff * diff <= r2 {
            self.within_in(lo, mid, q, r2, f);
        }
        if diff >= 0.0 || diff * diff <= r2 {
            self.within_in(mid + 1, hi, q, r2, f);
        }
    }
}

fn dist2(a: [f64; 3], b: [f64; 3]) -> f64 {
    (a[0] - b[0]).powi(2) + (a[1] - b[1]).powi(2) + (a[2] - b[2]).powi(2)
}

fn build(points: &[[f64; 3]], ids: &mut [u32], axis: &mut [u8]) {
    if ids.len() <= 1 {
        return;
    }
    let mut lo = [f64::INFINITY; 3];
    let mut hi = [f64::NEG_INFINITY; 3];
    for &i in ids.iter() {
        let p = points[i as usize];
        for a in 0..3 {
            lo[a] = lo[a].min(p[a]);
            hi[a] = hi[a].max(p[a]);
        }
    }
    let a = (0..3).max_by(|&x, &y| (hi[x] - lo[x]).total_cmp(&(hi[y] - lo[y]))).unwrap_or(0);
    let mid = ids.len() / 2;
    ids.select_nth_unstable_by(mid, |&x, &y| points[x as usize][a].total_cmp(&points[y as usize][a]));
    axis[mid] = a as u8;
    let (left, rest) = ids.split_at_mut(mid);
    let (al, arest) = axis.split_at_mut(mid);
    build(points, left, al);
    build(points, &mut rest[1..], &mut arest[1..]);
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A small deterministic generator for test points (SplitMix64, Steele, Lea and Flood 2014,
    /// "Fast splittable pseudorandom number generators", OOPSLA).
    fn points(n: usize, seed: u64) -> Vec<[f64; 3]> {
        let mut s = seed;
        let mut next = || {
            s = s.wrapping_add(0x9E37_79B9_7F4A_7C15);
            let mut z = s;
            z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
            z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
            ((z ^ (z >> 31)) >> 11) as f64 / (1u64 << 53) as f64
        };
        (0..n).map(|_| [next(), next() * 0.3, next() * 2.0]).collect()
    }

    // The k-d tree of Bentley (1975); outside reference: brute force over all points.
    #[test]
    fn nearest_matches_brute_force_on_random_points() {
        for (n, seed) in [(1, 1), (2, 2), (7, 3), (100, 4), (2000, 5)] {
            let pts = points(n, seed);
            let tree = KdTree::new(&pts);
            for q in points(300, seed + 100) {
                let q = [q[0] * 1.4 - 0.2, q[1] * 2.0 - 0.2, q[2] - 0.5];
                let (_, d2) = tree.nearest(q).unwrap();
                let brute = pts.iter().map(|&p| dist2(p, q)).fold(f64::INFINITY, f64::min);
                assert_eq!(d2, brute, "n = {n}, q = {q:?}");
            }
        }
    }

    // The k-d tree of Bentley (1975); outside reference: brute force over all points.
    #[test]
    fn within_matches_brute_force_including_duplicates() {
        let mut pts = points(500, 9);
        pts.extend_from_slice(&pts.clone()[..50]); // duplicated points
        let tree = KdTree::new(&pts);
        for (qi, q) in points(100, 77).into_iter().enumerate() {
            let r = 0.05 + 0.002 * qi as f64;
            let mut got = Vec::new();
            tree.within(q, r, |i, _| got.push(i));
            got.sort();
            let want: Vec<usize> = (0..pts.len()).filter(|&i| dist2(pts[i], q) <= r * r).collect();
            assert_eq!(got, want);
        }
    }

    #[test]
    fn empty_tree_has_no_nearest() {
        assert!(KdTree::new(&[]).nearest([0.0; 3]).is_none());
    }
}
