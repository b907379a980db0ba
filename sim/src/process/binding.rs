//! Binding and uptake: receptor binding on cells, internalisation, receptor recycling,
//! non-specific adsorption to the matrix, phagocytic uptake and lymphatic drainage.
//!
//! Receptor binding follows the mass-action law
//! `dB/dt = kon C (R - B) - koff_eff B - kint B`, `dI/dt = kint B`
//! (the receptor binding model of the binding-site barrier: Fujimori, Covell, Fletcher and
//! Weinstein 1990, J Nucl Med 31:1191; its dimensionless analysis: Thurber, Schmidt and Wittrup
//! 2008, Adv Drug Deliv Rev 60:1421), whose equilibrium without internalisation is the Langmuir
//! isotherm `B/R = C/(KD + C)`, `KD = koff/kon`. Rates are per particle: a free particle in a voxel
//! whose cell carries `R_free` free receptors binds at `valency kon R_free / V_acc` (`V_acc`: the
//! fluid volume it can reach in the voxel). A bound particle of valency `n` leaves only when all
//! its bonds are open; with each further bond re-forming against the effective receptor
//! concentration `C_eff = (receptors per cell area) / (ligand reach)`, the effective
//! dissociation rate is `koff (KD / (KD + C_eff))^(n-1)` (the avidity of multivalent binding,
//! Mammen, Choi and Whitesides 1998, Angew Chem Int Ed 37:2754; this closed form is the
//! model's choice). Each bound particle occupies `n` receptors; internalised particles take
//! their receptors with them, and the surface recovers at the recycling rate.
//!
//! Adsorption to the matrix: rate `k_ads |zeta| (phi / phi_ref)`, times a factor for positive
//! particles (the matrix is negatively charged); desorption at a constant rate. Phagocytes take up
//! the free particles of their voxel at a rate rising with size (linear in radius, 1 at 50 nm)
//! and with positive charge and lowered by a stealth coating (orders of magnitude as in the
//! common-practice rules of particle clearance; the model's choice of form). Lymphatics drain
//! the free particles of a voxel with its lymph flow: rate `Q_L / V_acc`.
//!
//! Transitions use the exact probability `1 - exp(-k dt)` for each particle, drawn for a packet of
//! `w` particles as a binomial count, and split between competing channels by conditional
//! binomials. Particles detached from a cell or the matrix are held at their voxel (and can
//! rebind there) until a packet's worth has gathered, then leave as a new packet.

use std::sync::Mutex;
use std::sync::atomic::{AtomicU64, Ordering};

use bevy_ecs::entity::EntityIndexSet;
use bevy_ecs::prelude::*;
use rayon::prelude::*;

use crate::lattice::Lattice;
use crate::params::Params;
use crate::particles::packets::{PREFETCH_AHEAD, prefetch};
use crate::particles::{Designs, Packets};
use crate::process::accounting::Ledger;
use crate::process::transport::MotionFields;
use crate::rng::{Domain, Stream, Streams, stream};
use crate::scenario::{Coating, ReceptorTarget};
use crate::tissue::{Cell, CellKind, CellLoad, MAX_SPECIES, Matrix, Occupancy, Receptors};
use crate::world::{Clock, Phase, Seed};

/// Parameters of binding and uptake (SI).
#[derive(Resource, Debug, Clone, PartialEq)]
pub struct BindingParams {
    /// Receptor recycling rate, 1/s.
    pub receptor_recycling: f64,
    /// Surface area of a cell, m^2.
    pub cell_area: f64,
    /// Ligand reach, m.
    pub ligand_reach: f64,
    /// Adsorption rate per volt of surface potential at the reference matrix fraction, 1/(s V).
    pub adsorption_per_volt: f64,
    /// Factor on adsorption of positive particles.
    pub cationic_factor: f64,
    /// Matrix fraction of the reference rate.
    pub matrix_reference_fraction: f64,
    /// Desorption rate, 1/s.
    pub desorption: f64,
    /// Phagocyte uptake rate of a 100 nm neutral uncoated particle, 1/s.
    pub phagocyte_uptake: f64,
    /// Factor on uptake for a stealth coating.
    pub stealth_uptake_factor: f64,
    /// Potential that doubles uptake of positive particles, V.
    pub uptake_charge_scale: f64,
}

/// Rate constants of each species derived from its design.
#[derive(Resource, Debug, Clone, Default)]
pub struct Kinetics {
    pub species: Vec<SpeciesKinetics>,
}

/// Rate constants of one species.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SpeciesKinetics {
    /// Which cells carry its receptor (`None`: untargeted).
    pub target: Option<CellKind>,
    /// `valency kon`, m^3/s: binding rate per free receptor per particle per unit accessible volume.
    pub kon_eff: f64,
    /// Effective dissociation rate by a cell of receptor density `receptors / cell area`, 1/s, for
    /// a cell of the target's nominal receptor count.
    pub koff: f64,
    /// Single-bond dissociation and association constants for the avidity rule.
    pub koff_single: f64,
    pub kon_single: f64,
    /// Bonds per bound particle.
    pub valency: u32,
    /// Internalisation rate, 1/s.
    pub kint: f64,
    /// Adsorption rate at the reference matrix fraction, 1/s.
    pub adsorption: f64,
    /// Phagocytic uptake rate, 1/s.
    pub phagocytosis: f64,
    /// Particles per packet.
    pub packet: u64,
}

impl SpeciesKinetics {
    /// Effective dissociation rate for a cell with `receptors` receptors on area `area` (m^2).
    pub fn koff_eff(&self, receptors: f64, area: f64, reach: f64) -> f64 {
        if self.valency <= 1 || self.kon_single <= 0.0 {
            return self.koff_single;
        }
        let kd = self.koff_single / self.kon_single; // particles per m^3
        let c_eff = receptors / area / reach;
        self.koff_single * (kd / (kd + c_eff)).powi(self.valency as i32 - 1)
    }
}

impl Kinetics {
    /// Rate constants of every design.
    pub fn build(designs: &Designs, p: &BindingParams) -> Self {
        let species = designs
            .0
            .iter()
            .map(|d| {
                let (target, kon_single, koff_single, valency, kint) = match &d.ligand {
                    Some(l) => (
                        Some(match l.target {
                            ReceptorTarget::Cancer => CellKind::Cancer,
                            ReceptorTarget::Host => CellKind::Host,
                        }),
                        l.kon,
                        l.koff,
                        l.valency,
                        l.kint,
                    ),
                    None => (None, 0.0, 0.0, 1, 0.0),
                };
                let charge = d.potential.abs() * if d.potential > 0.0 { p.cationic_factor } else { 1.0 };
                let stealth = if d.coating == Coating::Stealth { p.stealth_uptake_factor } else { 1.0 };
                let charge_up = 1.0 + (d.potential.max(0.0) / p.uptake_charge_scale);
                SpeciesKinetics {
                    target,
                    kon_eff: kon_single * valency as f64,
                    koff: koff_single,
                    koff_single,
                    kon_single,
                    valency,
                    kint,
                    adsorption: p.adsorption_per_volt * charge,
                    phagocytosis: p.phagocyte_uptake * (d.radius / 50e-9) * charge_up * stealth,
                    packet: d.packet,
                }
            })
            .collect();
        Kinetics { species }
    }
}

/// What each voxel offers a free particle: its cell's kind and free receptors. Kept current by
/// the systems that change receptors (each cell writes only its own voxel, so the stores are
/// plain relaxed atomics, the same for any thread count).
#[derive(Resource, Debug)]
pub struct CellSites {
    /// Cell kind code (`CellKind as u8`), or `NO_CELL`.
    pub kind: Vec<u8>,
    /// Free receptors of the voxel's cell (`f64` bits).
    free: Vec<AtomicU64>,
}

/// Marks a voxel without a cell in [`CellSites::kind`].
pub const NO_CELL: u8 = u8::MAX;

impl CellSites {
    /// Empty sites for a lattice.
    pub fn new(n: usize) -> Self {
        CellSites { kind: vec![NO_CELL; n], free: (0..n).map(|_| AtomicU64::new(0f64.to_bits())).collect() }
    }

    /// Free receptors at voxel `v`.
    #[inline]
    pub fn free(&self, v: usize) -> f64 {
        f64::from_bits(self.free[v].load(Ordering::Relaxed))
    }

    /// Records the free receptors of the cell at voxel `v`.
    #[inline]
    pub fn set_free(&self, v: usize, x: f64) {
        self.free[v].store(x.to_bits(), Ordering::Relaxed);
    }

    /// Rebuilds every site from the cells (at the start, and after cells appear, move or die).
    pub fn rebuild<'a>(&mut self, cells: impl Iterator<Item = (&'a Cell, &'a Receptors)>) {
        self.kind.iter_mut().for_each(|k| *k = NO_CELL);
        for (c, r) in cells {
            self.kind[c.voxel as usize] = c.kind as u8;
            self.set_free(c.voxel as usize, r.free);
        }
    }
}

/// Steps between updates of a cell's own kinetics (unbinding, internalisation, recycling), with
/// the cells staggered over the interval. Chosen so that the fastest of those first-order rates
/// moves at most 1 % of a cell's bound particles per update: each update applies the exact
/// transition probabilities over its whole interval, so only the coupling to binding lags.
#[derive(Resource, Debug, Clone, Copy, PartialEq, Eq)]
pub struct CellInterval(pub u64);

/// Steps between updates of a voxel's desorption from the matrix, staggered over the voxels by
/// the rule of [`CellInterval`]: at most 1 % of a voxel's adsorbed particles leave per update.
#[derive(Resource, Debug, Clone, Copy, PartialEq, Eq)]
pub struct DesorptionInterval(pub u64);

/// Cells that hold particles or are recovering receptors: the only ones whose own kinetics need
/// updating. A cell joins when a particle first binds to it or is taken up by it.
#[derive(Resource, Debug, Default)]
pub struct ActiveCells {
    /// The active cells, in the order they joined.
    pub cells: EntityIndexSet,
    /// Their voxels as a bit set (bit `v % 64` of word `v / 64`), which the settlement reads to
    /// find the cells that join.
    voxels: Vec<u64>,
}

impl ActiveCells {
    /// Adds the cell `e` at voxel `v`.
    pub fn insert(&mut self, e: Entity, v: u32) {
        let word = (v / 64) as usize;
        if self.voxels.len() <= word {
            self.voxels.resize(word + 1, 0);
        }
        self.voxels[word] |= 1 << (v % 64);
        self.cells.insert(e);
    }

    /// Whether the cell at voxel `v` is active.
    #[inline]
    pub fn has_voxel(&self, v: u32) -> bool {
        self.voxels.get((v / 64) as usize).is_some_and(|w| w & (1 << (v % 64)) != 0)
    }
}

/// Particles bound and taken up by each voxel's cell since that cell last took them into its
/// [`CellLoad`], per species: `[bound, internalised]`. The settlement adds to them; a cell takes
/// its share when its own kinetics next run ([`cell_kinetics`], every [`CellInterval`] steps and
/// at the last step), and every cell takes its share before a snapshot or a checkpoint reads the
/// cells ([`hand_over_gains`]). Handing gains over only then, instead of after every settlement,
/// spares a pass over every cell each step; the results are the same, since nothing else reads
/// a cell's load or free receptors in between (the settlement draws on the voxel's mirror of
/// its free receptors, [`CellSites`], which is always current), and [`crate::process::accounting`]
/// counts the gains not yet handed over.
#[derive(Resource, Debug, Default)]
pub struct CellGains {
    per_species: Vec<Vec<[AtomicU64; 2]>>,
}

impl CellGains {
    /// Empty gains for `species` species on `n` voxels.
    pub fn new(species: usize, n: usize) -> Self {
        CellGains { per_species: (0..species).map(|_| (0..n).map(|_| Default::default()).collect()).collect() }
    }

    /// Takes the gains of voxel `v`'s cell into `load` and clears them; returns whether there
    /// were any. Only the cell of voxel `v` may call this (cells update in parallel).
    #[inline]
    fn take_into(&self, v: usize, load: &mut CellLoad) -> bool {
        let mut any = false;
        for (s, g) in self.per_species.iter().enumerate() {
            let [b, i] = [g[v][0].load(Ordering::Relaxed), g[v][1].load(Ordering::Relaxed)];
            if b > 0 || i > 0 {
                load.bound[s] += b;
                load.internalised[s] += i;
                g[v][0].store(0, Ordering::Relaxed);
                g[v][1].store(0, Ordering::Relaxed);
                any = true;
            }
        }
        any
    }

    /// Particles of species `s` bound and internalised but not yet handed over to the cells.
    pub fn pending(&self, s: usize) -> [u64; 2] {
        self.per_species.get(s).map_or([0, 0], |g| {
            g.par_iter()
                .map(|x| [x[0].load(Ordering::Relaxed), x[1].load(Ordering::Relaxed)])
                .reduce(|| [0, 0], |a, b| [a[0] + b[0], a[1] + b[1]])
        })
    }
}

/// Brings every cell up to date with the settlements since its last update: pending
/// [`CellGains`] into its [`CellLoad`] and its free receptors from [`CellSites`] (before
/// anything reads the cells as a whole: snapshots, checkpoints, tests). Changes no result.
pub fn hand_over_gains(world: &mut World) {
    if !world.contains_resource::<CellGains>() || !world.contains_resource::<CellSites>() {
        return;
    }
    world.resource_scope(|world, gains: Mut<CellGains>| {
        world.resource_scope(|world, sites: Mut<CellSites>| {
            let mut q = world.query::<(&Cell, &mut Receptors, &mut CellLoad)>();
            q.par_iter_mut(world).for_each(|(cell, mut rec, mut load)| {
                let v = cell.voxel as usize;
                if gains.per_species.first().is_some_and(|g| g.len() > v) && gains.take_into(v, &mut load) {
                    rec.free = sites.free(v);
                }
            });
        });
    });
}

/// Particles gathered at a voxel and ready to leave as a packet: (voxel, species, particles).
#[derive(Resource, Debug, Default)]
pub struct Releases(pub Mutex<Vec<(u32, u8, u64, u64)>>);

/// Lymph flow leaving the interstitium of each voxel, m^3/s (zero where lymphatics do not work).
#[derive(Resource, Debug, Clone)]
pub struct LymphFlow(pub Vec<f64>);

/// Particles adsorbed to the matrix of each voxel, and those desorbed but not yet gathered into
/// a packet, per species.
#[derive(Resource, Debug, Clone, Default)]
pub struct MatrixLoad {
    pub bound: Vec<Vec<u64>>,
    pub held: Vec<Vec<u64>>,
}

/// A reaction of a free packet that touches shared state, applied after the parallel pass.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
struct Event {
    voxel: u32,
    index: u32,
    species: u8,
    kind: EventKind,
    count: u64,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
enum EventKind {
    /// A request to bind `count` particles to the voxel's cell (capped by its receptors).
    Bind,
    /// `count` particles taken up by the voxel's phagocyte.
    Phagocytosis,
    /// `count` particles adsorbed to the voxel's matrix.
    Adsorption,
}

/// Per-chunk event buffers, kept between steps.
#[derive(Resource, Default)]
pub struct EventBuffers {
    chunks: Vec<Vec<Event>>,
    /// Lowest and highest voxel among each chunk's events (`(u32::MAX, 0)` for none): the
    /// packets are kept in voxel order, so a chunk's events span few of the settlement's ranges.
    spans: Vec<(u32, u32)>,
    /// Chunks filled by the last pass.
    used: usize,
    /// Per voxel range of the settlement: voxels whose cell gained its first particles.
    joined: Vec<Vec<u32>>,
    /// Per voxel range: (packet index, particles bound) of the granted binding requests.
    granted: Vec<Vec<(u32, u64)>>,
}

const CHUNK: usize = 2048;

/// Voxel ranges the settlement is split into (each a whole number of 64-voxel words of the
/// active cells' voxel bit set). A fixed count: the settlement's results do not depend on it at
/// all, since every voxel's events are settled in packet order whatever the ranges.
const SETTLE_RANGES: usize = 16;

/// Draws a binomial split of `n` among rates `k` (sum `total`), in order: each channel takes a
/// Binomial(left, k_c / rate left) share, the last channel of nonzero rate all that is left
/// (so a lone channel takes everything without a draw).
#[inline]
fn split(rng: &mut Stream, mut n: u64, k: &[f64], mut total: f64, out: &mut [u64]) {
    let last = k.iter().rposition(|&kc| kc > 0.0).unwrap_or(0);
    for (c, &kc) in k.iter().enumerate() {
        if n == 0 || total <= 0.0 || kc <= 0.0 {
            out[c] = 0;
            continue;
        }
        let take = if c == last { n } else { rng.binomial(n, (kc / total).min(1.0)) };
        out[c] = take;
        n -= take;
        total -= kc;
    }
}

/// The rates of the packet reactions that do not depend on the receptors left, per species and
/// voxel: `[k_phago, k_ads, k_drain, kon_eff / V_acc]` (1/s, and 1/s per free receptor; the
/// last is zero where the voxel's cell does not carry the species' receptor), or all zero where
/// the species cannot reach the voxel's fluid. One 16-byte record per voxel in `f32` (a relative
/// rounding of 6e-8, far below what any rate is known to), so a packet reads a quarter of a
/// cache line and the table is half the size of an `f64` one; rebuilt by [`packet_reactions`]
/// when the cells, matrix, lymph flow, motion coefficients or kinetics change.
#[derive(Debug, Default)]
pub struct ReactionRates {
    rates: Vec<Vec<[f32; 4]>>,
}

impl ReactionRates {
    /// Recomputes every record.
    #[allow(clippy::too_many_arguments)]
    pub fn rebuild(
        &mut self,
        l: &Lattice,
        kin: &Kinetics,
        sites: &CellSites,
        motion: &MotionFields,
        matrix: &Matrix,
        p: &BindingParams,
        lymph: &LymphFlow,
    ) {
        let vol = l.voxel_volume();
        let n = l.len();
        self.rates.resize_with(kin.species.len(), Vec::new);
        for (s, out) in self.rates.iter_mut().enumerate() {
            out.resize(n, [0.0; 4]);
            let k = &kin.species[s];
            out.par_iter_mut().enumerate().for_each(|(v, r)| {
                let vacc = motion.a[s][v] * vol;
                if vacc <= 0.0 {
                    *r = [0.0; 4];
                    return;
                }
                let kind = sites.kind[v];
                let bind = match k.target {
                    Some(t) if kind == t as u8 => k.kon_eff / vacc,
                    _ => 0.0,
                };
                let phago = if kind == CellKind::Phagocyte as u8 { k.phagocytosis } else { 0.0 };
                let phi = matrix.collagen.data[v] + matrix.gag.data[v];
                *r = [phago, k.adsorption * phi / p.matrix_reference_fraction, lymph.0[v] / vacc, bind]
                    .map(|x| x as f32);
            });
        }
    }
}

/// One parallel pass over the free packets: drainage is applied at once (booked in the
/// returned counts); binding, phagocytosis and adsorption become events.
#[allow(clippy::too_many_arguments)]
fn react_packets(
    rates: &ReactionRates,
    sites: &CellSites,
    packets: &mut Packets,
    bufs: &mut EventBuffers,
    seed: u64,
    step: u64,
    dt: f64,
) -> [u64; MAX_SPECIES] {
    let n_chunks = packets.len().div_ceil(CHUNK);
    if bufs.chunks.len() < n_chunks {
        bufs.chunks.resize_with(n_chunks, Vec::new);
    }
    bufs.spans.resize(bufs.chunks.len(), (u32::MAX, 0));
    let Packets { id, voxel, species, weight, .. } = packets;
    let streams = Streams::new(seed, Domain::Binding);
    let drained = weight
        .par_chunks_mut(CHUNK)
        .zip(voxel.par_chunks(CHUNK))
        .zip(id.par_chunks(CHUNK))
        .zip(species.par_chunks(CHUNK))
        .zip(bufs.chunks.par_iter_mut().zip(bufs.spans.par_iter_mut()))
        .enumerate()
        .map(|(c, ((((wt, vox), ids), sp), (ev, span)))| {
            ev.clear();
            let mut drained = [0u64; MAX_SPECIES];
            for i in 0..wt.len() {
                if let Some(&ahead) = vox.get(i + PREFETCH_AHEAD) {
                    let (a, t) = (ahead as usize, sp[i + PREFETCH_AHEAD] as usize);
                    prefetch(&rates.rates[t][a]);
                    prefetch(&sites.free[a]);
                }
                let w = wt[i];
                if w == 0 {
                    continue;
                }
                let s = sp[i] as usize;
                let v = vox[i] as usize;
                let [k_phago, k_ads, k_drain, bind] = rates.rates[s][v].map(f64::from);
                let k_bind = if bind > 0.0 { bind * sites.free(v) } else { 0.0 };
                let total = k_bind + k_phago + k_ads + k_drain;
                if total <= 0.0 {
                    continue;
                }
                let mut rng = streams.at(ids[i], step);
                let n = rng.binomial_of_rate(w, total * dt);
                if n == 0 {
                    continue;
                }
                let mut out = [0u64; 4];
                split(&mut rng, n, &[k_bind, k_phago, k_ads, k_drain], total, &mut out);
                let [nb, np, na, nd] = out;
                // Drained, phagocytosed and adsorbed particles leave the packet now; binding
                // requests are settled against the cell's receptors afterwards.
                wt[i] = w - np - na - nd;
                drained[s] += nd;
                let index = (c * CHUNK + i) as u32;
                let base = Event { voxel: v as u32, index, species: s as u8, kind: EventKind::Bind, count: 0 };
                if nb > 0 {
                    ev.push(Event { count: nb, ..base });
                }
                if np > 0 {
                    ev.push(Event { kind: EventKind::Phagocytosis, count: np, ..base });
                }
                if na > 0 {
                    ev.push(Event { kind: EventKind::Adsorption, count: na, ..base });
                }
            }
            *span = ev.iter().fold((u32::MAX, 0), |(lo, hi), e| (lo.min(e.voxel), hi.max(e.voxel)));
            drained
        })
        .reduce(
            || [0u64; MAX_SPECIES],
            |mut a, b| {
                for s in 0..MAX_SPECIES {
                    a[s] += b[s];
                }
                a
            },
        );
    bufs.used = n_chunks;
    drained
}

/// The reaction pass over packets and the settlement of its events.
#[allow(clippy::too_many_arguments)]
pub fn packet_reactions(
    lattice: Res<Lattice>,
    kin: Res<Kinetics>,
    sites: Res<CellSites>,
    (motion, matrix, params, lymph): (Res<MotionFields>, Res<Matrix>, Res<BindingParams>, Res<LymphFlow>),
    clock: Res<Clock>,
    seed: Res<Seed>,
    mut packets: ResMut<Packets>,
    mut bufs: ResMut<EventBuffers>,
    mut mload: ResMut<MatrixLoad>,
    mut ledger: ResMut<Ledger>,
    (mut active, mut gains, occupancy): (ResMut<ActiveCells>, ResMut<CellGains>, Res<Occupancy>),
    mut rates: Local<ReactionRates>,
) {
    let stale = rates.rates.len() != kin.species.len() || rates.rates.first().is_some_and(|r| r.len() != lattice.len());
    if stale
        || kin.is_changed()
        || sites.is_changed()
        || motion.is_changed()
        || matrix.is_changed()
        || params.is_changed()
        || lymph.is_changed()
    {
        rates.rebuild(&lattice, &kin, &sites, &motion, &matrix, &params, &lymph);
    }
    let drained = react_packets(&rates, &sites, &mut packets, &mut bufs, seed.0, clock.step, clock.dt);
    for (total, n) in ledger.drained.iter_mut().zip(drained) {
        *total += n;
    }
    settle(&mut bufs, &kin, &sites, &mut gains, &mut active, &mut mload, &mut packets.weight, lattice.len());
    // Cells that took their first particles join the active set, in entity order.
    let mut joined: Vec<(Entity, u32)> =
        bufs.joined.iter().flatten().filter_map(|&v| occupancy.cell[v as usize].map(|e| (e, v))).collect();
    joined.sort_unstable();
    for (e, v) in joined {
        active.insert(e, v);
    }
}

/// One voxel range's share of the settlement: its slices of the per-voxel tables and its lists.
struct SettleRange<'a> {
    /// First voxel of the range.
    lo: u32,
    /// One past its last voxel.
    hi: u32,
    bound: Vec<&'a mut [u64]>,
    gained: Vec<&'a mut [[AtomicU64; 2]]>,
    /// The range's words of the active cells' voxel bit set.
    active: &'a mut [u64],
    joined: &'a mut Vec<u32>,
    granted: &'a mut Vec<(u32, u64)>,
}

/// Settles the events of the last reaction pass: adsorption onto the voxel's matrix, uptake by
/// its phagocyte, and binding requests granted against the free receptors of its cell (each
/// request capped by what is left, so the order of requests at a voxel matters). Every voxel's
/// events are settled in packet order (chunks in order, each in packet order): the packets'
/// order is the same for any thread count, and so is every settlement. Voxels do not share
/// state, so the lattice is cut into [`SETTLE_RANGES`] ranges settled in parallel, each
/// scanning only the chunks whose events reach it. The voxel's mirror of its cell's free
/// receptors ([`CellSites`]) is the account binding draws on; what each cell gained is added to
/// its voxel's [`CellGains`], and the voxels of cells that gained their first particles are
/// listed; granted requests leave their packets last.
#[allow(clippy::too_many_arguments)]
fn settle(
    bufs: &mut EventBuffers,
    kin: &Kinetics,
    sites: &CellSites,
    gains: &mut CellGains,
    active: &mut ActiveCells,
    mload: &mut MatrixLoad,
    weight: &mut [u64],
    n_voxels: usize,
) {
    let EventBuffers { chunks, spans, used, joined, granted } = bufs;
    let ns = kin.species.len();
    if gains.per_species.len() != ns || gains.per_species.first().is_some_and(|g| g.len() != n_voxels) {
        *gains = CellGains::new(ns, n_voxels);
    }
    active.voxels.resize(n_voxels.div_ceil(64), 0);
    let width = n_voxels.div_ceil(SETTLE_RANGES).next_multiple_of(64).max(64);
    let n_ranges = n_voxels.div_ceil(width);
    joined.resize_with(n_ranges, Vec::new);
    granted.resize_with(n_ranges, Vec::new);
    let mut bound_parts: Vec<_> = mload.bound.iter_mut().map(|b| b.chunks_mut(width)).collect();
    let mut gained_parts: Vec<_> = gains.per_species.iter_mut().map(|g| g.chunks_mut(width)).collect();
    let ranges: Vec<SettleRange> = active
        .voxels
        .chunks_mut(width / 64)
        .zip(joined.iter_mut().zip(granted.iter_mut()))
        .enumerate()
        .map(|(r, (bits, (joined, granted)))| SettleRange {
            lo: (r * width) as u32,
            hi: ((r + 1) * width).min(n_voxels) as u32,
            bound: bound_parts.iter_mut().map(|it| it.next().expect("one slice per range")).collect(),
            gained: gained_parts.iter_mut().map(|it| it.next().expect("one slice per range")).collect(),
            active: bits,
            joined,
            granted,
        })
        .collect();
    let chunks = &chunks[..*used];
    let spans = &spans[..*used];
    ranges.into_par_iter().for_each(|mut r| {
        r.joined.clear();
        r.granted.clear();
        let (lo, hi) = (r.lo, r.hi);
        for (ev, &(first, last)) in chunks.iter().zip(spans) {
            if last < lo || first >= hi {
                continue;
            }
            for (i, e) in ev.iter().enumerate() {
                // The records an event updates lie in per-voxel tables far larger than the
                // caches: ask for those of an event further on while this one is settled.
                if let Some(a) = ev.get(i + PREFETCH_AHEAD).filter(|a| (lo..hi).contains(&a.voxel)) {
                    let (s, v) = (a.species as usize, (a.voxel - lo) as usize);
                    match a.kind {
                        EventKind::Adsorption => prefetch(&r.bound[s][v]),
                        EventKind::Phagocytosis => prefetch(&r.gained[s][v]),
                        EventKind::Bind => {
                            prefetch(&sites.free[a.voxel as usize]);
                            prefetch(&r.gained[s][v]);
                        }
                    }
                }
                if !(lo..hi).contains(&e.voxel) {
                    continue;
                }
                let s = e.species as usize;
                let v = (e.voxel - lo) as usize;
                // A cell's first gain lists its voxel once: the cell joins the active set.
                let touch = |r: &mut SettleRange| {
                    let (word, bit) = (v / 64, 1u64 << (v % 64));
                    if r.active[word] & bit == 0 {
                        r.active[word] |= bit;
                        r.joined.push(e.voxel);
                    }
                };
                match e.kind {
                    EventKind::Adsorption => r.bound[s][v] += e.count,
                    EventKind::Phagocytosis => {
                        touch(&mut r);
                        *r.gained[s][v][1].get_mut() += e.count;
                    }
                    EventKind::Bind => {
                        let val = kin.species[s].valency as f64;
                        let free = sites.free(e.voxel as usize);
                        let room = (free / val).floor().max(0.0) as u64;
                        let accepted = e.count.min(room);
                        if accepted > 0 {
                            touch(&mut r);
                            *r.gained[s][v][0].get_mut() += accepted;
                            sites.set_free(e.voxel as usize, free - accepted as f64 * val);
                            r.granted.push((e.index, accepted));
                        }
                    }
                }
            }
        }
    });
    for &(i, k) in granted.iter().flatten() {
        weight[i as usize] -= k;
    }
}

/// Unbinding, internalisation, recycling and rebinding of held particles, cell by cell
/// (in parallel: each cell touches only its own state, its own site and its own random stream).
/// A cell updates every [`CellInterval`] steps, over the time since its last update.
#[allow(clippy::too_many_arguments)] // a system's parameters are the resources it reads
pub fn cell_kinetics(
    lattice: Res<Lattice>,
    kin: Res<Kinetics>,
    motion: Res<MotionFields>,
    params: Res<BindingParams>,
    interval: Res<CellInterval>,
    sites: Res<CellSites>,
    releases: Res<Releases>,
    (active, gains): (Res<ActiveCells>, Res<CellGains>),
    clock: Res<Clock>,
    seed: Res<Seed>,
    mut cells: Query<(&Cell, &mut Receptors, &mut CellLoad)>,
) {
    let now = clock.time + clock.dt;
    let vol = lattice.voxel_volume();
    let (step, seed, m) = (clock.step, seed.0, interval.0);
    let last_step = clock.is_last_step();
    let ns = kin.species.len();
    // The active cells due at this step: those whose voxel is in this step's phase of the
    // interval (all of them at the last step). A pass over every cell in storage order, which
    // skips the others on two cheap tests, costs less than visiting the due cells by entity
    // (each such visit looks the entity up and waits on memory).
    let phase = (m - step % m) % m;
    let streams = Streams::new(seed, Domain::Binding);
    // The recycled fraction `1 - exp(-k_rec dt)` depends only on the time since a cell's last
    // update, which most due cells share: each task keeps the last one it computed.
    let recycled = |dt: f64| 1.0 - (-params.receptor_recycling * dt).exp();
    cells.par_iter_mut().for_each_init(
        || (f64::NAN, 0.0),
        |memo, (cell, mut rec, mut load)| {
            if !active.has_voxel(cell.voxel) || (!last_step && u64::from(cell.voxel) % m != phase) {
                return;
            }
            let dt = now - load.updated_at;
            if dt <= 0.0 {
                return;
            }
            // The particles bound and taken up since the cell's last update, and the free receptors
            // the settlements left it.
            let v = cell.voxel as usize;
            if gains.take_into(v, &mut load) {
                rec.free = sites.free(v);
            }
            let busy = (0..ns).any(|s| load.bound[s] > 0 || load.held[s] > 0) || rec.surface < rec.total;
            load.updated_at = now;
            if !busy {
                return;
            }
            let mut rng = streams.at(u64::from(cell.voxel) | (1 << 40), step);
            for s in 0..ns {
                let k = &kin.species[s];
                let val = f64::from(k.valency);
                if load.bound[s] > 0 {
                    let koff = k.koff_eff(rec.total, params.cell_area, params.ligand_reach);
                    let total = koff + k.kint;
                    if total > 0.0 {
                        let n = rng.binomial_of_rate(load.bound[s], total * dt);
                        let n_int = rng.binomial(n, k.kint / total);
                        let n_off = n - n_int;
                        load.bound[s] -= n;
                        load.internalised[s] += n_int;
                        load.held[s] += n_off;
                        rec.free += n_off as f64 * val;
                        rec.surface -= n_int as f64 * val;
                    }
                }
                if load.held[s] > 0 && k.target.is_some_and(|t| t == cell.kind) {
                    let vacc = motion.a[s][v] * vol;
                    if vacc > 0.0 && rec.free >= val {
                        let rate = k.kon_eff * rec.free / vacc;
                        let n = rng.binomial_of_rate(load.held[s], rate * dt);
                        let n = n.min((rec.free / val).floor() as u64);
                        load.held[s] -= n;
                        load.bound[s] += n;
                        rec.free -= n as f64 * val;
                    }
                }
                if load.held[s] >= k.packet {
                    let n = load.held[s] / k.packet;
                    load.held[s] -= n * k.packet;
                    releases.0.lock().expect("release list").push((cell.voxel, s as u8, n, k.packet));
                }
            }
            if rec.surface < rec.total && params.receptor_recycling > 0.0 {
                if memo.0 != dt {
                    *memo = (dt, recycled(dt));
                }
                let back = (rec.total - rec.surface) * memo.1;
                rec.surface += back;
                rec.free += back;
            }
            sites.set_free(v, rec.free);
        },
    );
}

/// Desorption from the matrix, voxel by voxel: voxel `v` updates at the steps with
/// `(step + v) % interval == 0` ([`DesorptionInterval`]), over the `interval` steps since its
/// last update, by the exact probability `1 - exp(-k_des interval dt)` per particle (at the
/// last step every voxel catches up on the steps since its last update).
pub fn matrix_kinetics(
    params: Res<BindingParams>,
    kin: Res<Kinetics>,
    interval: Res<DesorptionInterval>,
    clock: Res<Clock>,
    seed: Res<Seed>,
    releases: Res<Releases>,
    mut mload: ResMut<MatrixLoad>,
) {
    if params.desorption <= 0.0 {
        return;
    }
    let m = interval.0.max(1);
    let step = clock.step;
    let last_step = clock.is_last_step();
    let x = params.desorption * clock.dt;
    let streams = Streams::new(seed.0, Domain::Binding);
    const CHUNK: usize = 4096;
    let MatrixLoad { bound, held } = &mut *mload;
    for (s, (b, h)) in bound.iter_mut().zip(held.iter_mut()).enumerate() {
        let w = kin.species[s].packet;
        b.par_chunks_mut(CHUNK).zip(h.par_chunks_mut(CHUNK)).enumerate().for_each(|(c, (b, h))| {
            let base = (c * CHUNK) as u64;
            // The first voxel of the chunk due now, then every m-th (all of them at the last step).
            let (first, stride) = if last_step { (0, 1) } else { (((m - (step + base) % m) % m) as usize, m as usize) };
            for i in (first..b.len()).step_by(stride) {
                if b[i] > 0 {
                    let v = base + i as u64;
                    // Steps since the voxel's last update (m when it is due now).
                    let r = (step + v) % m;
                    let steps = if r == 0 { m } else { r };
                    let mut rng = streams.at(v | ((s as u64 + 2) << 40), step);
                    let n = rng.binomial_of_rate(b[i], x * steps as f64);
                    b[i] -= n;
                    h[i] += n;
                    if h[i] >= w {
                        let k = h[i] / w;
                        h[i] -= k * w;
                        releases.0.lock().expect("release list").push((v as u32, s as u8, k, w));
                    }
                }
            }
        });
    }
}

/// Turns the particles gathered at voxels into new packets, in a fixed order (voxel, species):
/// new packet ids do not depend on which thread gathered what.
pub fn release_held(
    lattice: Res<Lattice>,
    clock: Res<Clock>,
    seed: Res<Seed>,
    releases: Res<Releases>,
    mut packets: ResMut<Packets>,
) {
    let mut list = releases.0.lock().expect("release list");
    if list.is_empty() {
        return;
    }
    list.sort_unstable();
    for &(v, s, n, w) in list.iter() {
        let ijk = lattice.ijk(v as usize);
        let c = lattice.centre(ijk);
        let mut rng = stream(seed.0, Domain::Binding, u64::from(v) | ((100 + u64::from(s)) << 40), clock.step);
        for _ in 0..n {
            let x = [
                c[0] + (rng.uniform() - 0.5) * lattice.h,
                c[1] + (rng.uniform() - 0.5) * lattice.h,
                c[2] + (rng.uniform() - 0.5) * lattice.h,
            ];
            packets.push(&lattice, x, s, w);
        }
    }
    list.clear();
}

/// Largest first-order rate a cell's own kinetics can reach, 1/s.
fn fastest_cell_rate(kin: &Kinetics, p: &BindingParams) -> f64 {
    kin.species.iter().map(|k| k.koff_single + k.kint).fold(p.receptor_recycling, f64::max)
}

/// Steps between updates of a first-order process of rate `k` (1/s) such that an update moves at
/// most 1 % of what it acts on (1 to 1000 steps).
fn update_interval(k: f64, time_step: f64) -> u64 {
    if k > 0.0 { ((0.01 / (k * time_step)).floor() as u64).clamp(1, 1000) } else { 1000 }
}

/// Puts the kinetics of `designs` under `binding` in force: rate constants and the interval
/// between cell updates (each cell's update integrates exactly over the time since its last).
pub fn set_kinetics(world: &mut World, designs: &Designs, binding: &BindingParams, time_step: f64) {
    let kin = Kinetics::build(designs, binding);
    let k = fastest_cell_rate(&kin, binding);
    let interval = update_interval(k, time_step);
    world.insert_resource(CellInterval(interval));
    world.insert_resource(DesorptionInterval(update_interval(binding.desorption, time_step)));
    world.insert_resource(kin);
    world.insert_resource(binding.clone());
}

/// Adds binding and uptake to the schedule.
pub fn install(world: &mut World, schedule: &mut Schedule, params: &Params) {
    let designs = world.resource::<Designs>().clone();
    let n = world.resource::<Lattice>().len();
    set_kinetics(world, &designs, &params.binding, params.run.time_step);
    let mut sites = CellSites::new(n);
    let mut q = world.query::<(&Cell, &Receptors)>();
    sites.rebuild(q.iter(world));
    world.insert_resource(sites);
    world.init_resource::<Releases>();
    world.init_resource::<ActiveCells>();
    world.init_resource::<EventBuffers>();
    world.insert_resource(CellGains::new(designs.len(), n));
    if !world.contains_resource::<LymphFlow>() {
        world.insert_resource(LymphFlow(vec![0.0; n]));
    }
    world.insert_resource(MatrixLoad { bound: vec![vec![0; n]; designs.len()], held: vec![vec![0; n]; designs.len()] });
    schedule
        .add_systems((packet_reactions, cell_kinetics, matrix_kinetics, release_held).chain().in_set(Phase::Binding));
}
