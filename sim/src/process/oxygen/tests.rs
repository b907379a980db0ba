use super::*;

fn params() -> OxygenParams {
    OxygenParams::resolve(&Scenario::default())
}

/// Inputs of a lattice of `n x n x 2` voxels with one vessel along z through the centre column.
fn single_vessel(n: usize, h: f64, wall: f64) -> (Lattice, OxygenInputs, usize) {
    let l = Lattice::new([n, n, 2], h, [0.0; 3]);
    let c = n / 2;
    let mut inputs = OxygenInputs {
        diffusivity: vec![0.0; l.len()],
        wall: vec![0.0; l.len()],
        vmax: vec![0.0; l.len()],
        shortfall: Vec::new(),
    };
    for k in 0..2 {
        inputs.wall[l.idx(c, c, k)] = wall;
    }
    (l, inputs, c)
}

/// Distance of voxel (i, j) from the centre column, m.
fn radius(l: &Lattice, i: usize, j: usize, c: usize) -> f64 {
    let (di, dj) = (i as f64 - c as f64, j as f64 - c as f64);
    (di * di + dj * dj).sqrt() * l.h
}

#[test]
fn krogh_cylinder_profile_on_the_lattice() {
    // Krogh 1919 (J Physiol 52:409): a tissue cylinder of radius R around a straight vessel,
    // zero-order consumption M, no flux at R:
    // c(r) = c_w + M/(4D)(r^2 - r_w^2) - M R^2/(2D) ln(r / r_w).
    // Differences c(r) - c(r1) do not depend on c_w or r_w, so the vessel voxel (held near c_b
    // by a large wall conductance) stands for the wall. The discrete cylinder is the set of voxel
    // columns with centres within R; the profile uses the radius of a disc of its area. Zero
    // order: Km is a millionth of the concentrations.
    let h = 2.5e-6;
    let r_cyl = 100e-6;
    let n = 2 * (r_cyl / h) as usize + 5;
    let (l, mut inputs, c) = single_vessel(n, h, 1e-6);
    let mut p = params();
    p.vmax = 1e-2;
    p.diffusivity = 2e-9;
    p.blood = 0.2;
    p.km = 1e-7;
    p.newton_tolerance = 1e-9;
    p.solver_tolerance = 1e-10;
    let mut columns = 0usize;
    for v in 0..l.len() {
        let [i, j, k] = l.ijk(v);
        let inside = radius(&l, i, j, c) <= r_cyl;
        if inside {
            inputs.diffusivity[v] = p.diffusivity;
            if inputs.wall[v] == 0.0 {
                inputs.vmax[v] = p.vmax;
            }
            columns += usize::from(k == 0);
        } else {
            // Outside the cylinder: cut off (no diffusion), held at c_b by itself.
            inputs.wall[v] = 1e-18;
        }
    }
    let r_eff = (columns as f64 * h * h / std::f64::consts::PI).sqrt();
    let mut conc = vec![p.blood; l.len()];
    let mut state = None;
    solve(&l, &inputs, &p, &mut state, &mut conc).unwrap();
    let (m, d) = (p.vmax, p.diffusivity);
    let krogh = |r: f64, r1: f64| m / (4.0 * d) * (r * r - r1 * r1) - m * r_eff * r_eff / (2.0 * d) * (r / r1).ln();
    let r1 = 4.0 * h;
    let c1 = conc[l.idx(c + 4, c, 0)];
    let drop = -krogh(r_cyl - h, r1);
    let mut worst = 0.0f64;
    for i in c + 4..=c + (r_cyl / h) as usize - 1 {
        for j in [c, c + 3] {
            let r = radius(&l, i, j, c);
            if r > r_cyl - h || r < r1 {
                continue;
            }
            let r1j = radius(&l, c + 4, c, c);
            let err = (conc[l.idx(i, j, 0)] - c1) - krogh(r, r1j);
            worst = worst.max(err.abs());
        }
    }
    // Tolerance: the staircase edge of the cylinder misplaces the no-flux surface by up to half
    // a voxel, an error of order (h/2)/R of the drop (1.25 % here), and the discrete line source
    // departs from ln r by O(h^2/r^2) (under 1 % at r >= 4h): 3 % of the drop.
    assert!(worst < 0.03 * drop, "largest error {worst:.3e} of a drop {drop:.3e} mol/m^3");
}

#[test]
fn hypoxic_distance_in_a_vessel_array_is_100_to_200_um() {
    // Thomlinson and Gray 1955 (Br J Cancer 9:539): tumour cords turn necrotic about 100 to
    // 200 um from the nearest vessel (common practice for the hypoxic distance). A square
    // array of parallel capillaries 500 um apart is one unit cell with zero-flux faces around a
    // vessel; every voxel holds a living cell; default oxygen parameters; capillary of radius
    // 4 um (its wall area 2 pi r h per voxel). The hypoxic distance is where pO2 first falls
    // below the hypoxic threshold going out from the vessel along x.
    let p = params();
    let h = 5e-6;
    let n = 101;
    let wall = p.permeability * 2.0 * std::f64::consts::PI * 4e-6 * h;
    let (l, mut inputs, c) = single_vessel(n, h, wall);
    inputs.diffusivity.iter_mut().for_each(|d| *d = p.diffusivity);
    for v in 0..l.len() {
        if inputs.wall[v] == 0.0 {
            inputs.vmax[v] = p.vmax;
        }
    }
    let mut conc = vec![p.blood; l.len()];
    let mut state = None;
    let report = solve(&l, &inputs, &p, &mut state, &mut conc).unwrap();
    let hyp = (c..n).find(|&i| conc[l.idx(i, c, 0)] < p.hypoxic).expect("some tissue is hypoxic");
    let distance = (hyp - c) as f64 * h;
    println!("hypoxic distance {:.0} um after {} Newton iterations", distance * 1e6, report.newton_iterations);
    assert!((100e-6..=200e-6).contains(&distance), "hypoxic distance {:.0} um", distance * 1e6);
    // Further out the tissue turns anoxic.
    assert!(conc[l.idx(n - 1, n - 1, 0)] < p.necrotic, "corner {:.3e}", conc[l.idx(n - 1, n - 1, 0)]);
}

#[test]
fn newton_converges_to_the_michaelis_menten_balance() {
    // A well-mixed voxel (one cell, no diffusion partner): W (c_b - c) = V Vmax c / (c + Km),
    // solved exactly as a quadratic.
    let l = Lattice::new([1, 1, 1], 10e-6, [0.0; 3]);
    let p = params();
    let vol = l.voxel_volume();
    let w = 1e-15;
    let inputs =
        OxygenInputs { diffusivity: vec![p.diffusivity], wall: vec![w], vmax: vec![p.vmax], shortfall: Vec::new() };
    let mut c = vec![p.blood];
    solve(&l, &inputs, &p, &mut None, &mut c).unwrap();
    // w c^2 + (w Km - w cb + V Vmax) c - w cb Km = 0
    let (a, b, cc) = (w, w * p.km - w * p.blood + vol * p.vmax, -w * p.blood * p.km);
    let exact = (-b + (b * b - 4.0 * a * cc).sqrt()) / (2.0 * a);
    assert!((c[0] - exact).abs() < 1e-6 * p.blood, "{} vs {exact}", c[0]);
}

#[test]
fn small_dense_solve_and_anderson_mixing() {
    // Gaussian elimination with pivoting: the residual of a 3x3 system with a zero leading entry.
    let a = vec![vec![0.0, 2.0, 1.0], vec![1.0, 1.0, 1.0], vec![2.0, 1.0, 3.0]];
    let b = vec![3.0, 6.0, 13.0];
    let x = solve_small(a.clone(), b.clone()).unwrap();
    for (row, bi) in a.iter().zip(&b) {
        let r: f64 = row.iter().zip(&x).map(|(a, x)| a * x).sum();
        assert!((r - bi).abs() < 1e-12);
    }
    assert!(solve_small(vec![vec![1.0, 2.0], vec![2.0, 4.0]], vec![1.0, 2.0]).is_none());
    // Anderson mixing of a slowly contracting linear map x -> M x + c (contraction 0.97) finds
    // its fixed point in far fewer rounds than plain iteration (which needs about 450 for 1e-6).
    let g = |x: &[f64]| vec![0.97 * x[0] + 0.01 * x[1] + 1.0, 0.02 * x[0] + 0.95 * x[1] - 0.5];
    let mut mix = Anderson::new(5);
    let mut x = vec![0.0, 0.0];
    let mut rounds = 0;
    loop {
        let gx = g(&x);
        let change = x.iter().zip(&gx).map(|(a, b)| (a - b).abs()).fold(0.0, f64::max);
        if change < 1e-9 {
            break;
        }
        x = mix.next(&x, &gx);
        rounds += 1;
        assert!(rounds < 20, "Anderson mixing did not converge");
    }
}
