use super::*;
use crate::params::CellParams;
use crate::terrain::random_field::semivariogram;
use crate::tissue::{Cell, CellKind, HOST, Receptors};

fn tissue(cv: f64, l_um: f64) -> TissueParams {
    let h = Heterogeneity { cv, correlation_length: l_um * UM };
    TissueParams { mask_file: None, stromal_fraction: 0.0, matrix: h, receptors: h, vessel_density: h }
}

fn uniform_regions(l: &Lattice, r: u8) -> Regions {
    Regions { region: Field::filled("region", "1", "", l.len(), r) }
}

#[test]
fn applied_matrix_and_receptor_fields_have_the_requested_statistics() {
    // Against the model of random_field.rs: the factor is exp(mu + s G) with s^2 = ln(1 + cv^2),
    // G of correlation exp(-r^2 / (2 l^2)). Checked on what the generator applies: collagen over
    // its base value, and receptors per cell over the base number. Tolerances: 4 standard errors
    // for N_eff = V / ((2 pi)^(3/2) l^3) independent samples per field (the integral scale of
    // the covariance) over all seeds: SE(mean of the factor) = cv / sqrt(N_eff), SE(variance of
    // ln f) = s^2 sqrt(2 / N_eff), and the same for the semivariogram of ln f.
    let l = Lattice::new([48, 48, 48], 10.0 * UM, [0.0; 3]);
    let (cv, lc) = (0.5, 30.0);
    let p = tissue(cv, lc);
    let mp = crate::params::Params::resolve(&Scenario::default()).matrix;
    let seeds = 4u64;
    let s2 = (1.0 + cv * cv).ln();
    let neff = seeds as f64 * l.len() as f64 / (std::f64::consts::TAU.powf(1.5) * (lc / 10.0f64).powi(3));
    let (mut mean_m, mut var_m, mut gam_m, mut mean_r, mut var_r) = (0.0f64, 0.0f64, 0.0f64, 0.0f64, 0.0f64);
    let cells = CellParams { occupancy: [1.0, 1.0], receptors: [1.0e3, 1.0e5], tumour_phagocyte_fraction: 0.0 };
    for seed in 0..seeds {
        let f = TerrainFactors::draw(&l, &p, seed);
        let regions = uniform_regions(&l, HOST);
        let m = matrix(&regions, &mp, &f);
        let ratio: Vec<f64> = m.collagen.data.iter().map(|c| c / mp.collagen_fraction[0]).collect();
        let logs: Vec<f64> = ratio.iter().map(|x| x.ln()).collect();
        let n = ratio.len() as f64;
        let lm = logs.iter().sum::<f64>() / n;
        mean_m += ratio.iter().sum::<f64>() / n / seeds as f64;
        var_m += logs.iter().map(|x| (x - lm).powi(2)).sum::<f64>() / n / seeds as f64;
        gam_m += semivariogram(&l, &logs, 3) / seeds as f64;
        // Receptors on cancer cells, one per voxel.
        let mut world = World::new();
        let tumour = uniform_regions(&l, TUMOUR);
        crate::tissue::place_cells(&mut world, &l, &tumour, &cells, seed, 0.0, Some(&f.receptors.data));
        let rec: Vec<f64> = world.query::<&Receptors>().iter(&world).map(|r| r.total / 1.0e5).collect();
        assert_eq!(rec.len(), l.len());
        let lr: Vec<f64> = rec.iter().map(|x| x.ln()).collect();
        let lrm = lr.iter().sum::<f64>() / n;
        mean_r += rec.iter().sum::<f64>() / n / seeds as f64;
        var_r += lr.iter().map(|x| (x - lrm).powi(2)).sum::<f64>() / n / seeds as f64;
    }
    let se_mean = cv / neff.sqrt();
    let se_var = s2 * (2.0 / neff).sqrt();
    assert!((mean_m - 1.0).abs() < 4.0 * se_mean, "matrix factor mean {mean_m}");
    assert!((mean_r - 1.0).abs() < 4.0 * se_mean, "receptor factor mean {mean_r}");
    assert!((var_m - s2).abs() < 4.0 * se_var, "matrix log-variance {var_m} vs {s2}");
    assert!((var_r - s2).abs() < 4.0 * se_var, "receptor log-variance {var_r} vs {s2}");
    // Semivariogram of ln f at lag l (3 voxels): s^2 (1 - exp(-1/2)).
    let e = s2 * (1.0 - (-0.5f64).exp());
    assert!((gam_m - e).abs() < 4.0 * se_var, "gamma(l) {gam_m} vs {e}");
    // Reproducible: the same seed gives the same factors.
    assert_eq!(TerrainFactors::draw(&l, &p, 3).matrix.data, TerrainFactors::draw(&l, &p, 3).matrix.data);
}

#[test]
fn stromal_cells_take_their_fraction_of_the_tumour() {
    // Binomial: the stromal count of N tumour cells is within 4 sqrt(N p (1 - p)) of N p.
    let l = Lattice::new([40, 40, 40], 10.0 * UM, [0.0; 3]);
    let cells = CellParams { occupancy: [1.0, 1.0], receptors: [1.0e3, 1.0e5], tumour_phagocyte_fraction: 0.0 };
    let mut world = World::new();
    crate::tissue::place_cells(&mut world, &l, &uniform_regions(&l, TUMOUR), &cells, 9, 0.25, None);
    let kinds: Vec<CellKind> = world.query::<&Cell>().iter(&world).map(|c| c.kind).collect();
    let n = kinds.len() as f64;
    let stromal = kinds.iter().filter(|&&k| k == CellKind::Stromal).count() as f64;
    assert!((stromal - 0.25 * n).abs() < 4.0 * (n * 0.25 * 0.75).sqrt(), "{stromal} of {n}");
}

#[test]
fn masks_set_the_regions_and_bad_masks_are_named() {
    let dir = tempfile::tempdir().unwrap();
    let l = Lattice::new([4, 3, 2], 10.0 * UM, [0.0; 3]);
    let path = dir.path().join("t.mask");
    let mut bytes = vec![0u8; 24];
    bytes[l.idx(1, 1, 0)] = 1;
    bytes[l.idx(2, 1, 1)] = 1;
    std::fs::write(&path, &bytes).unwrap();
    let r = read_mask(&path, &l).unwrap();
    assert_eq!(r.region.data, bytes);
    let g = bounding_ellipsoid(&l, &r);
    assert!((g.centre[0] - 20.0 * UM).abs() < 1e-12 && (g.semi_axes[0] - 10.0 * UM).abs() < 1e-12, "{g:?}");
    // Wrong size: the file and the expected size are named.
    std::fs::write(&path, [0u8; 23]).unwrap();
    let e = read_mask(&path, &l).unwrap_err().to_string();
    assert!(e.contains("t.mask") && e.contains("expected exactly 24"), "{e}");
    // A value other than 0 or 1: its position is named.
    bytes[5] = 7;
    std::fs::write(&path, &bytes).unwrap();
    let e = read_mask(&path, &l).unwrap_err().to_string();
    assert!(e.contains("byte 5") && e.contains("is 7"), "{e}");
    // Missing file: an I/O error naming the key.
    let e = read_mask(&dir.path().join("none.mask"), &l).unwrap_err().to_string();
    assert!(e.contains("tissue.tumour_mask_file"), "{e}");
}
