use super::*;

fn growth_params() -> GrowthParams {
    let mut g = GrowthParams::resolve(&Scenario::default());
    g.enabled = true;
    g.time_step = HOUR;
    g.cycle_time = 24.0 * HOUR;
    g.max_push = 8;
    g
}

fn oxygen_params() -> OxygenParams {
    OxygenParams::resolve(&Scenario::default())
}

/// A grower on `l` with cancer cells where `cancer(ijk)` holds, walls `wall(ijk)` (m^3/s).
fn grower<'a>(
    l: &Lattice,
    g: &'a GrowthParams,
    ox: &'a OxygenParams,
    cancer: impl Fn([usize; 3]) -> bool,
    wall: impl Fn([usize; 3]) -> f64,
) -> Grower<'a> {
    let n = l.len();
    let kind: Vec<u8> = (0..n).map(|v| if cancer(l.ijk(v)) { CANCER } else { 0 }).collect();
    let region = kind.iter().map(|&k| if k == CANCER { TUMOUR } else { 0 }).collect();
    let cw = (0..n).map(|v| wall(l.ijk(v))).collect();
    Grower::new(l, g, ox, 7, kind, vec![1.0; n], region, vec![0.0; n], None, cw).unwrap()
}

fn run(gr: &mut Grower<'_>, hours: usize, np: &crate::params::NetworkParams) {
    for _ in 0..hours {
        gr.advance(HOUR, np).unwrap();
    }
}

fn centre_block(c: [usize; 3], half: usize) -> impl Fn([usize; 3]) -> bool {
    move |x: [usize; 3]| (0..3).all(|a| x[a].abs_diff(c[a]) <= half)
}

#[test]
fn unconstrained_growth_doubles_per_cycle_time() {
    // Exponential growth N(t) = N0 2^(t/T) (the definition of the cycle time T for cells that
    // all cycle; common practice): with ages uniform in [0, T), each cell divides once per T.
    // Oxygen everywhere (walls in every voxel), room around a small cluster.
    let l = Lattice::new([40, 40, 40], 20.0 * UM, [0.0; 3]);
    let (g, ox) = (growth_params(), oxygen_params());
    let np = crate::params::Params::resolve(&Scenario::default()).network;
    let mut gr = grower(&l, &g, &ox, centre_block([20; 3], 2), |_| 1e-9);
    let n0 = gr.count(Some(CANCER)) as f64;
    run(&mut gr, 24, &np);
    let n1 = gr.count(Some(CANCER)) as f64;
    run(&mut gr, 24, &np);
    let n2 = gr.count(Some(CANCER)) as f64;
    // Every cell that reaches its cycle end divides: exactly 2x and 4x less the cells whose
    // age reached T inside the last step (none: ages advance by whole steps from [0, T)).
    assert!((n1 / n0 - 2.0).abs() < 0.05, "{n0} -> {n1}");
    assert!((n2 / n0 - 4.0).abs() < 0.1, "{n0} -> {n1} -> {n2}");
    assert_eq!(gr.count_state(HYPOXIC) + gr.count_state(NECROTIC), 0);
}

#[test]
fn growth_slows_when_space_or_oxygen_runs_out() {
    let l = Lattice::new([24, 24, 24], 20.0 * UM, [0.0; 3]);
    let (mut g, ox) = (growth_params(), oxygen_params());
    let np = crate::params::Params::resolve(&Scenario::default()).network;
    // Space: the lattice full but for one plane; pushing reaches at most 2 voxels.
    g.max_push = 2;
    let mut gr = grower(&l, &g, &ox, |x| x[2] != 12, |_| 1e-9);
    let n0 = gr.count(None) as f64;
    run(&mut gr, 24, &np);
    let n1 = gr.count(None) as f64;
    assert!(n1 <= n0 + (24 * 24) as f64, "{n0} -> {n1}: more cells than free voxels");
    assert!(n1 / n0 < 1.1, "{n0} -> {n1}");
    // Oxygen: host cells on every other voxel around the cluster (room enough), and walls in
    // every voxel that let through less oxygen than the cells consume at the hypoxic threshold,
    // W (c_b - c) < V Vmax c / (c + Km) with half the voxels consuming: the cells turn hypoxic,
    // stop cycling, and the cluster grows far less than twofold per cycle.
    let g = growth_params();
    let ox = oxygen_params();
    let w = 0.25 * l.voxel_volume() * ox.vmax * ox.hypoxic / (ox.hypoxic + ox.km) / ox.blood;
    let mut gr = grower(&l, &g, &ox, centre_block([12; 3], 2), |_| w);
    for v in 0..l.len() {
        let [i, j, k] = l.ijk(v);
        if gr.kind[v] == 0 && (i + j + k) % 2 == 0 {
            gr.kind[v] = 1 + CellKind::Host as u8;
            gr.state[v] = VIABLE;
        }
    }
    let n0 = gr.count(Some(CANCER)) as f64;
    run(&mut gr, 24, &np);
    let n1 = gr.count(Some(CANCER)) as f64;
    assert!(gr.count_state(HYPOXIC) + gr.count_state(NECROTIC) > 0);
    assert!(n1 / n0 < 1.2, "{n0} -> {n1}");
}

#[test]
fn a_tumour_that_outgrows_its_supply_forms_a_necrotic_core() {
    // Vessels only on the faces of the box around a ball of 200 um radius whose cells consume
    // 10 times the default: a ball fed at its surface at c_b turns anoxic at the centre once its
    // radius exceeds sqrt(6 D c_b / Vmax) = 220 um (zero-order consumption in a sphere), so as
    // it grows its centre dies; the necrotic cells lie deeper than the viable ones.
    let l = Lattice::new([40, 40, 40], 20.0 * UM, [0.0; 3]);
    let g = growth_params();
    let mut ox = oxygen_params();
    ox.vmax *= 10.0;
    let np = crate::params::Params::resolve(&Scenario::default()).network;
    let r2 = |x: [usize; 3]| (0..3).map(|a| (x[a] as f64 - 19.5).powi(2)).sum::<f64>();
    let wall = 1e4 * UM * 200.0 / crate::units::CM * l.voxel_volume();
    let face = |x: [usize; 3]| x.iter().any(|&c| c == 0 || c == 39);
    let mut gr = grower(&l, &g, &ox, |x| r2(x) <= 100.0, |x| if face(x) { wall } else { 0.0 });
    gr.oxygenate().unwrap();
    let nec0 = gr.count_state(NECROTIC);
    run(&mut gr, 48, &np);
    let nec = gr.count_state(NECROTIC);
    assert!(nec > nec0 && nec > 0, "necrotic cells {nec0} -> {nec}");
    let mean_r = |s: u8| {
        let (sum, n) = gr.state.iter().enumerate().filter(|(_, x)| **x == s).fold((0.0, 0usize), |(a, n), (v, _)| {
            let ijk = l.ijk(v);
            (a + r2(ijk).sqrt(), n + 1)
        });
        sum / n.max(1) as f64
    };
    assert!(mean_r(NECROTIC) + 3.0 < mean_r(VIABLE), "necrotic {} viable {}", mean_r(NECROTIC), mean_r(VIABLE));
    // The centre voxel is necrotic.
    assert_eq!(gr.state[l.idx(20, 20, 20)], NECROTIC);
}

#[test]
fn growth_is_identical_for_one_and_two_threads() {
    // Results are a function of scenario and seed: the same growth in pools of 1 and 2 threads.
    let l = Lattice::new([32, 32, 32], 20.0 * UM, [0.0; 3]);
    let (g, ox) = (growth_params(), oxygen_params());
    let np = crate::params::Params::resolve(&Scenario::default()).network;
    let grow_in = |threads: usize| {
        let pool = rayon::ThreadPoolBuilder::new().num_threads(threads).build().unwrap();
        pool.install(|| {
            let r2 = |x: [usize; 3]| (0..3).map(|a| (x[a] as f64 - 15.5).powi(2)).sum::<f64>();
            let mut gr = grower(&l, &g, &ox, |x| r2(x) <= 64.0, |x| if r2(x) > 100.0 { 1e-12 } else { 0.0 });
            run(&mut gr, 12, &np);
            (gr.kind.clone(), gr.state.clone(), gr.oxygen.iter().map(|x| x.to_bits()).collect::<Vec<_>>())
        })
    };
    assert!(grow_in(1) == grow_in(2));
}

#[test]
fn a_diffusing_signal_falls_off_exponentially_beside_a_hypoxic_region() {
    // s - L^2 s'' = 1 for x < x0 and 0 beyond, on a line: s = 1 - exp(-(x0 - x)/L)/2 inside and
    // exp(-(x - x0)/L)/2 outside (the steady reaction-diffusion of a released, decaying factor;
    // e.g. Crank 1975, section 14.2, from memory). A box of 80 x 2 x 2 voxels of 10 um, hypoxic
    // below x0 = 400 um, L = 60 um: the faces lie more than 6 L away, and the second-order
    // scheme's error (h/L)^2 / 12 is about 2e-3 (allowed: 4e-3).
    let l = Lattice::new([80, 2, 2], 10.0 * UM, [0.0; 3]);
    let length = 60.0 * UM;
    let (mut state, mut s) = (None, Vec::new());
    angiogenic_signal(&l, length, |v| l.ijk(v)[0] < 40, &mut state, &mut s).unwrap();
    let x0 = 400.0 * UM;
    for (v, &got) in s.iter().enumerate() {
        let x = (l.ijk(v)[0] as f64 + 0.5) * l.h;
        let want = if x < x0 { 1.0 - 0.5 * (-(x0 - x) / length).exp() } else { 0.5 * (-(x - x0) / length).exp() };
        assert!((got - want).abs() < 4e-3, "x = {} um: {got} vs {want}", x / UM);
    }
    // No hypoxia, no signal.
    angiogenic_signal(&l, length, |_| false, &mut state, &mut s).unwrap();
    assert!(s.iter().all(|&x| x == 0.0));
}
