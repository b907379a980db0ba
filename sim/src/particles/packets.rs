//! Free particle packets: a contiguous table (structure of arrays), kept in voxel order.
//!
//! A packet carries a known whole number of particles of one species at a continuous position.
//! Only free (mobile) particles travel as packets: particles bound to a cell or internalised
//! are held by the cell ([`crate::tissue::CellLoad`]), those adsorbed to the matrix by the
//! voxel ([`crate::process::binding::MatrixLoad`]), so each bound or internalised amount refers
//! to its cell. Packets are not ECS entities because the transport kernel streams over millions
//! of them every step: as plain arrays sorted by voxel they stay in cache and in SIMD-friendly
//! order, and removal and creation cost no archetype moves.

use bevy_ecs::prelude::Resource;
use rayon::prelude::*;

use crate::lattice::Lattice;

/// How many packets ahead the kernels that gather per-voxel data for each packet ask for that
/// data ([`prefetch`]): packets are in voxel order but their voxels' records lie far apart in
/// memory, and the request hides the wait for them behind the work on the packets in between.
pub const PREFETCH_AHEAD: usize = 16;

/// Asks the processor to bring the cache line holding `x` closer (a hint: no effect on results,
/// never faults).
#[inline(always)]
pub fn prefetch<T>(x: &T) {
    #[cfg(target_arch = "x86_64")]
    // SAFETY: a prefetch is a hint that never faults and reads nothing into the program; the
    // address comes from a live reference. SSE is part of the x86_64 baseline.
    unsafe {
        std::arch::x86_64::_mm_prefetch::<{ std::arch::x86_64::_MM_HINT_T0 }>((x as *const T).cast());
    }
    #[cfg(not(target_arch = "x86_64"))]
    let _ = x;
}

/// The free packets of every species.
#[derive(Resource, Debug, Default, Clone)]
pub struct Packets {
    /// Unique id of each packet, from which its random streams derive.
    pub id: Vec<u64>,
    /// Position, m.
    pub pos: Vec<[f64; 3]>,
    /// Linear index of the voxel holding `pos`.
    pub voxel: Vec<u32>,
    /// Species index.
    pub species: Vec<u8>,
    /// Particles in the packet (0 marks a packet to be removed).
    pub weight: Vec<u64>,
    /// Next id to hand out.
    pub next_id: u64,
    scratch_keys: Vec<(u64, u64, u32)>,
    scratch_pos: Vec<[f64; 3]>,
    scratch_u32: Vec<u32>,
    scratch_u64: Vec<u64>,
    scratch_u8: Vec<u8>,
}

impl Packets {
    /// Number of packets.
    pub fn len(&self) -> usize {
        self.id.len()
    }

    /// Whether there are none.
    pub fn is_empty(&self) -> bool {
        self.id.is_empty()
    }

    /// Adds a packet; returns its id.
    pub fn push(&mut self, lattice: &Lattice, pos: [f64; 3], species: u8, weight: u64) -> u64 {
        let v = lattice.voxel_of(pos).expect("packet inside the lattice");
        let id = self.next_id;
        self.next_id += 1;
        self.id.push(id);
        self.pos.push(pos);
        self.voxel.push(lattice.idx(v[0], v[1], v[2]) as u32);
        self.species.push(species);
        self.weight.push(weight);
        id
    }

    /// Appends `n` packets to be filled in place (positions, voxels, species and weights zero
    /// until then), with consecutive ids from the next one, as `n` calls of [`Packets::push`]
    /// would number them; returns the new rows.
    pub fn append(&mut self, n: usize) -> Rows<'_> {
        let start = self.len();
        self.id.extend(self.next_id..self.next_id + n as u64);
        self.next_id += n as u64;
        self.pos.resize(start + n, [0.0; 3]);
        self.voxel.resize(start + n, 0);
        self.species.resize(start + n, 0);
        self.weight.resize(start + n, 0);
        Rows {
            pos: &mut self.pos[start..],
            voxel: &mut self.voxel[start..],
            species: &mut self.species[start..],
            weight: &mut self.weight[start..],
        }
    }

    /// Removes the packets of weight zero, keeping the order of the others.
    pub fn compact(&mut self) {
        if !self.weight.contains(&0) {
            return;
        }
        let mut w = 0;
        for r in 0..self.len() {
            if self.weight[r] > 0 {
                if w != r {
                    self.id[w] = self.id[r];
                    self.pos[w] = self.pos[r];
                    self.voxel[w] = self.voxel[r];
                    self.species[w] = self.species[r];
                    self.weight[w] = self.weight[r];
                }
                w += 1;
            }
        }
        self.id.truncate(w);
        self.pos.truncate(w);
        self.voxel.truncate(w);
        self.species.truncate(w);
        self.weight.truncate(w);
    }

    /// Sorts the packets by the linear index of their voxel (x fastest, as every per-voxel table
    /// is laid out), then by id: a total order, so the result does not depend on the sort's
    /// parallelism. A pass over the packets then reads each per-voxel table as a few forward
    /// sweeps (the rows of the voxel and of its neighbours), which the processor's prefetcher
    /// follows; a Morton order, local in space, jumps between distant rows of those tables and
    /// measured 5-8 % slower over the whole step at 1e6 packets (no difference at 1e7, where
    /// every row is read anyway). Scratch space is kept between calls, each buffer as large as
    /// the column it replaces, so a sort never shrinks a column's capacity (a column swapped in
    /// at capacity = length would be copied whole by the next step's first new packet).
    pub fn sort_by_voxel(&mut self) {
        let n = self.len();
        self.scratch_keys.clear();
        let (voxel, id) = (&self.voxel, &self.id);
        self.scratch_keys.extend((0..n).map(|i| (u64::from(voxel[i]), id[i], i as u32)));
        self.scratch_keys.par_sort_unstable();
        macro_rules! permute {
            ($field:ident, $scratch:ident) => {{
                self.$scratch.clear();
                self.$scratch.reserve(self.$field.capacity());
                self.$scratch.extend(self.scratch_keys.iter().map(|k| self.$field[k.2 as usize]));
                std::mem::swap(&mut self.$field, &mut self.$scratch);
            }};
        }
        permute!(pos, scratch_pos);
        permute!(voxel, scratch_u32);
        permute!(weight, scratch_u64);
        permute!(species, scratch_u8);
        self.scratch_u64.clear();
        self.scratch_u64.reserve(self.id.capacity());
        self.scratch_u64.extend(self.scratch_keys.iter().map(|k| self.id[k.2 as usize]));
        std::mem::swap(&mut self.id, &mut self.scratch_u64);
    }

    /// Bytes the table holds on the heap (its columns and sort scratch, by capacity).
    pub fn heap_bytes(&self) -> usize {
        use std::mem::size_of;
        self.id.capacity() * size_of::<u64>()
            + self.pos.capacity() * size_of::<[f64; 3]>()
            + self.voxel.capacity() * size_of::<u32>()
            + self.species.capacity()
            + self.weight.capacity() * size_of::<u64>()
            + self.scratch_keys.capacity() * size_of::<(u64, u64, u32)>()
            + self.scratch_pos.capacity() * size_of::<[f64; 3]>()
            + self.scratch_u32.capacity() * size_of::<u32>()
            + self.scratch_u64.capacity() * size_of::<u64>()
            + self.scratch_u8.capacity()
    }

    /// Total particles of species `s` in packets.
    pub fn particles(&self, s: usize) -> u64 {
        self.species.iter().zip(&self.weight).filter(|(sp, _)| **sp as usize == s).map(|(_, w)| *w).sum()
    }

    /// Particles of species `s` per voxel, added into `out` (length = voxels).
    pub fn deposit(&self, s: usize, out: &mut [f64]) {
        for i in 0..self.len() {
            if self.species[i] as usize == s {
                out[self.voxel[i] as usize] += self.weight[i] as f64;
            }
        }
    }
}

/// Rows of the packet table to fill in place ([`Packets::append`]).
#[derive(Debug)]
pub struct Rows<'a> {
    pub pos: &'a mut [[f64; 3]],
    pub voxel: &'a mut [u32],
    pub species: &'a mut [u8],
    pub weight: &'a mut [u64],
}

impl<'a> Rows<'a> {
    /// The first `mid` rows and the rest.
    pub fn split_at(self, mid: usize) -> (Rows<'a>, Rows<'a>) {
        let (p0, p1) = self.pos.split_at_mut(mid);
        let (v0, v1) = self.voxel.split_at_mut(mid);
        let (s0, s1) = self.species.split_at_mut(mid);
        let (w0, w1) = self.weight.split_at_mut(mid);
        (Rows { pos: p0, voxel: v0, species: s0, weight: w0 }, Rows { pos: p1, voxel: v1, species: s1, weight: w1 })
    }

    /// Writes row `i`: a packet of `weight` particles of `species` at `pos` (inside `lattice`).
    #[inline]
    pub fn set(&mut self, i: usize, lattice: &Lattice, pos: [f64; 3], species: u8, weight: u64) {
        let v = lattice.voxel_of(pos).expect("packet inside the lattice");
        self.pos[i] = pos;
        self.voxel[i] = lattice.idx(v[0], v[1], v[2]) as u32;
        self.species[i] = species;
        self.weight[i] = weight;
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn compact_and_sort_keep_every_packet_once() {
        let l = Lattice::new([8, 8, 8], 1.0, [0.0; 3]);
        let mut p = Packets::default();
        for i in 0..200u64 {
            let x = [(i * 37 % 8) as f64 + 0.5, (i * 11 % 8) as f64 + 0.5, (i * 5 % 8) as f64 + 0.5];
            p.push(&l, x, (i % 3) as u8, i % 7);
        }
        let total: u64 = p.weight.iter().sum();
        p.compact();
        assert!(p.weight.iter().all(|&w| w > 0));
        assert_eq!(p.weight.iter().sum::<u64>(), total);
        p.sort_by_voxel();
        assert!(p.voxel.windows(2).all(|w| w[0] <= w[1]));
        // Every packet kept its own position and voxel.
        for i in 0..p.len() {
            let v = l.voxel_of(p.pos[i]).unwrap();
            assert_eq!(l.idx(v[0], v[1], v[2]) as u32, p.voxel[i]);
        }
        let mut ids = p.id.clone();
        ids.sort_unstable();
        ids.dedup();
        assert_eq!(ids.len(), p.len());
    }

    #[test]
    fn append_matches_push() {
        let l = Lattice::new([4, 4, 4], 1.0, [0.0; 3]);
        let xs: Vec<[f64; 3]> = (0..10).map(|i| [0.3 * i as f64, 3.9 - 0.2 * i as f64, 1.5]).collect();
        let mut a = Packets::default();
        let mut b = Packets::default();
        a.push(&l, [0.5; 3], 0, 1);
        b.push(&l, [0.5; 3], 0, 1);
        for (i, &x) in xs.iter().enumerate() {
            a.push(&l, x, 1, i as u64 + 2);
        }
        let (mut head, mut tail) = b.append(xs.len()).split_at(4);
        for (i, &x) in xs.iter().enumerate() {
            if i < 4 {
                head.set(i, &l, x, 1, i as u64 + 2);
            } else {
                tail.set(i - 4, &l, x, 1, i as u64 + 2);
            }
        }
        assert_eq!((a.id, a.pos, a.voxel, a.species, a.weight), (b.id, b.pos, b.voxel, b.species, b.weight));
        assert_eq!(a.next_id, b.next_id);
    }
}
