//! Sensitivity indices against outside references: the analytic Sobol indices of the Ishigami
//! function (Ishigami and Homma 1990; Saltelli et al. 2008, Global Sensitivity Analysis: The
//! Primer, section 4.8), the exact elementary effects of a linear function (Morris 1991), and
//! SALib (PyPI) run on the same samples and outputs (`tests/python/check_sensitivity.py`).

mod common;

use std::f64::consts::PI;
use std::path::Path;

use interstice_sweep::aggregate::{SensitivityRow, sensitivity_csv};
use interstice_sweep::design::{self, sampling_stream};
use interstice_sweep::sensitivity::{self, bootstrap_stream, normal_quantile};

const A: f64 = 7.0;
const B: f64 = 0.1;

/// The Ishigami function `sin x1 + a sin^2 x2 + b x3^4 sin x1` on [-pi, pi]^3
/// (Ishigami and Homma 1990, Proc. ISUMA '90, 398-403).
fn ishigami(x: &[f64]) -> f64 {
    x[0].sin() + A * x[1].sin().powi(2) + B * x[2].powi(4) * x[0].sin()
}

/// Its analytic partial variances (Saltelli et al. 2008, The Primer, section 4.8; Sobol' and
/// Levitan 1999): V1 = (1 + b pi^4 / 5)^2 / 2, V2 = a^2 / 8, V3 = 0, V13 = 8 b^2 pi^8 / 225,
/// V = a^2/8 + b pi^4/5 + b^2 pi^8/18 + 1/2. Returns (S1, ST, S13).
fn ishigami_indices() -> ([f64; 3], [f64; 3], f64) {
    let v1 = 0.5 * (1.0 + B * PI.powi(4) / 5.0).powi(2);
    let v2 = A * A / 8.0;
    let v13 = 8.0 * B * B * PI.powi(8) / 225.0;
    let v = A * A / 8.0 + B * PI.powi(4) / 5.0 + B * B * PI.powi(8) / 18.0 + 0.5;
    ([v1 / v, v2 / v, 0.0], [(v1 + v13) / v, v2 / v, v13 / v], v13 / v)
}

fn to_range(u: &[Vec<f64>]) -> Vec<Vec<f64>> {
    u.iter().map(|r| r.iter().map(|x| -PI + 2.0 * PI * x).collect()).collect()
}

fn write_table(path: &Path, x: &[Vec<f64>], y: &[f64]) {
    let mut s = String::from("run,x1,x2,x3,y\n");
    for (i, (r, v)) in x.iter().zip(y).enumerate() {
        s.push_str(&format!("{i},{:?},{:?},{:?},{v:?}\n", r[0], r[1], r[2]));
    }
    std::fs::write(path, s).unwrap();
}

fn row(
    index: &'static str,
    method: &'static str,
    p: usize,
    p2: Option<usize>,
    value: f64,
    conf: f64,
    n: usize,
) -> SensitivityRow {
    SensitivityRow {
        output: "y".into(),
        method,
        index,
        parameter: format!("x{}", p + 1),
        parameter2: p2.map(|k| format!("x{}", k + 1)).unwrap_or_default(),
        value,
        conf,
        samples: n,
    }
}

#[test]
fn ishigami_analytic_values_are_the_published_ones() {
    // Published to four decimals (Saltelli et al. 2008, table 4.1 for a = 7, b = 0.1).
    let (s1, st, _) = ishigami_indices();
    for (got, want) in s1.iter().zip([0.3139, 0.4424, 0.0]).chain(st.iter().zip([0.5576, 0.4424, 0.2437])) {
        assert!((got - want).abs() < 5e-5, "{got} vs {want}");
    }
}

#[test]
fn sobol_indices_of_ishigami_match_analytic_values_and_salib() {
    let n = 8192;
    let d = 3;
    let resamples = 1000;
    let u = design::saltelli(n, d, true, &mut sampling_stream(2024));
    let x = to_range(&u);
    let y: Vec<f64> = x.iter().map(|r| ishigami(r)).collect();
    let s = sensitivity::sobol(&y, d, true, resamples, 0.95, &mut bootstrap_stream(2024, 0));
    assert_eq!(s.base_rows, n);
    let (s1, st, s13) = ishigami_indices();
    // Tolerance: 4 standard errors of each estimate, the standard error from the bootstrap
    // (conf = z * se): a correct estimator lands outside with probability 6e-5.
    let z = normal_quantile(0.975);
    for k in 0..d {
        let se1 = s.s1_conf[k] / z;
        let set = s.st_conf[k] / z;
        assert!((s.s1[k] - s1[k]).abs() <= 4.0 * se1, "S1[{k}] = {} +- {se1}, analytic {}", s.s1[k], s1[k]);
        assert!((s.st[k] - st[k]).abs() <= 4.0 * set, "ST[{k}] = {} +- {set}, analytic {}", s.st[k], st[k]);
    }
    // Second order: S13 is the only interaction (analytic, as above), S12 = S23 = 0.
    let s2 = s.s2.as_ref().unwrap();
    let s2c = s.s2_conf.as_ref().unwrap();
    for (j, k, want) in [(0, 1, 0.0), (0, 2, s13), (1, 2, 0.0)] {
        let se = s2c[j][k] / z;
        assert!((s2[j][k] - want).abs() <= 4.0 * se, "S2[{j}{k}] = {} +- {se}, analytic {want}", s2[j][k]);
    }
    // SALib's sobol.analyze on the same rows and outputs.
    let dir = tempfile::tempdir().unwrap();
    let table = dir.path().join("table.csv");
    write_table(&table, &x, &y);
    let mut rows = Vec::new();
    for k in 0..d {
        rows.push(row("S1", "sobol", k, None, s.s1[k], s.s1_conf[k], n));
        rows.push(row("ST", "sobol", k, None, s.st[k], s.st_conf[k], n));
        for j in k + 1..d {
            rows.push(row("S2", "sobol", k, Some(j), s2[k][j], s2c[k][j], n));
        }
    }
    let sens = dir.path().join("sensitivity.csv");
    std::fs::write(&sens, sensitivity_csv(&rows)).unwrap();
    let out = common::python(
        "check_sensitivity.py",
        &[
            table.to_str().unwrap(),
            sens.to_str().unwrap(),
            "--method",
            "sobol",
            "--params",
            "x1,x2,x3",
            "--output",
            "y",
            "--second-order",
            "--resamples",
            &resamples.to_string(),
        ],
    );
    eprintln!("{out}");
    assert!(out.contains("0 differed"), "{out}");
}

#[test]
fn morris_indices_match_salib_and_linear_effects() {
    let d = 3;
    let r = 40;
    let levels = 6;
    let resamples = 2000;
    let u = design::morris(r, d, levels, &mut sampling_stream(77));
    // Structure (Morris 1991): consecutive points of a trajectory differ in one coordinate, by Delta.
    let delta = design::morris_delta(levels);
    for t in 0..r {
        for m in 1..=d {
            let (a, b) = (&u[t * (d + 1) + m - 1], &u[t * (d + 1) + m]);
            let moved: Vec<usize> = (0..d).filter(|&k| a[k] != b[k]).collect();
            assert_eq!(moved.len(), 1);
            assert!(((a[moved[0]] - b[moved[0]]).abs() - delta).abs() < 1e-12);
            assert!(b.iter().all(|v| (0.0..=1.0).contains(v)));
        }
    }
    // A linear function has constant elementary effects: EE_k = c_k exactly on the unit
    // hypercube, so mu = mu* = c_k (|c_k|) and sigma = 0 (Morris 1991, section 3).
    let c = [2.0, -0.5, 0.0];
    let y: Vec<f64> = u.iter().map(|x| x.iter().zip(c).map(|(a, b)| a * b).sum()).collect();
    let m = sensitivity::morris(&u, &y, d, levels, 100, 0.95, &mut bootstrap_stream(1, 0));
    for (k, ck) in c.iter().enumerate() {
        assert!((m.mu[k] - ck).abs() < 1e-12 && (m.mu_star[k] - ck.abs()).abs() < 1e-12 && m.sigma[k] < 1e-12);
    }
    // Ishigami on the Morris design, compared with SALib's morris.analyze.
    let x = to_range(&u);
    let y: Vec<f64> = x.iter().map(|r| ishigami(r)).collect();
    let m = sensitivity::morris(&u, &y, d, levels, resamples, 0.95, &mut bootstrap_stream(77, 0));
    assert_eq!(m.trajectories, r);
    let dir = tempfile::tempdir().unwrap();
    let table = dir.path().join("table.csv");
    write_table(&table, &x, &y);
    let mut rows = Vec::new();
    for k in 0..d {
        rows.push(row("mu", "morris", k, None, m.mu[k], f64::NAN, r));
        rows.push(row("mu_star", "morris", k, None, m.mu_star[k], m.mu_star_conf[k], r));
        rows.push(row("sigma", "morris", k, None, m.sigma[k], f64::NAN, r));
    }
    let sens = dir.path().join("sensitivity.csv");
    std::fs::write(&sens, sensitivity_csv(&rows)).unwrap();
    let out = common::python(
        "check_sensitivity.py",
        &[
            table.to_str().unwrap(),
            sens.to_str().unwrap(),
            "--method",
            "morris",
            "--params",
            "x1,x2,x3",
            "--output",
            "y",
            "--levels",
            &levels.to_string(),
            "--resamples",
            &resamples.to_string(),
        ],
    );
    eprintln!("{out}");
    assert!(out.contains("0 differed"), "{out}");
}
