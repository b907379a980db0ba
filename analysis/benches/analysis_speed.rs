//! Speed of the analysis on a 64^3 example run (4 snapshots, 2 species, vessels and cells), of
//! the k-d tree and of plot drawing. Prints `name value unit` lines.

use std::time::Instant;

use indicatif::ProgressBar;
use interstice_analysis::kdtree::KdTree;
use interstice_analysis::synthetic::{self, Example};
use interstice_analysis::{Options, RunFile, analyse, plot, report};

fn main() {
    let dir = tempfile::tempdir().expect("temporary folder");
    let path = dir.path().join("bench.h5");
    let e = Example { n: 64, h: 5e-6, ..Example::default() };
    synthetic::example(&e).write(&path).expect("example run");
    let voxels = (e.n * e.n * e.n * e.times_s.len()) as f64;

    let t0 = Instant::now();
    let run = RunFile::open(&path).expect("open");
    let m = analyse(&run, &Options::default(), &ProgressBar::hidden()).expect("analyse");
    let dt = t0.elapsed().as_secs_f64();
    println!("analyse_64cubed_4snapshots {dt:.3} s");
    println!("analyse_voxel_snapshots_per_s {:.3e} 1/s", voxels / dt);

    let t0 = Instant::now();
    let html = report::run_report(&m, &run).expect("report");
    println!("report_64cubed {:.3} s", t0.elapsed().as_secs_f64());
    println!("report_size {:.1} kB", html.len() as f64 / 1e3);

    // k-d tree: build and nearest queries over random points (SplitMix64 stream).
    let mut s = 7u64;
    let mut next = || {
        s = s.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = s;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        ((z ^ (z >> 31)) >> 11) as f64 / (1u64 << 53) as f64
    };
    let pts: Vec<[f64; 3]> = (0..200_000).map(|_| [next(), next(), next()]).collect();
    let t0 = Instant::now();
    let tree = KdTree::new(&pts);
    println!("kdtree_build_200k {:.3} s", t0.elapsed().as_secs_f64());
    let queries: Vec<[f64; 3]> = (0..500_000).map(|_| [next(), next(), next()]).collect();
    let t0 = Instant::now();
    let mut acc = 0.0;
    for q in &queries {
        acc += tree.nearest(*q).map_or(0.0, |x| x.1);
    }
    let dt = t0.elapsed().as_secs_f64();
    println!("kdtree_nearest_queries_per_s {:.3e} 1/s", queries.len() as f64 / dt);
    assert!(acc > 0.0);

    let fig = &interstice_analysis::figures::run_figures(&m)[0];
    let t0 = Instant::now();
    let reps = 5;
    for _ in 0..reps {
        plot::line_png(&fig.chart, plot::SIZE).expect("png");
    }
    println!("line_chart_png_800x500 {:.1} ms", t0.elapsed().as_secs_f64() / reps as f64 * 1e3);
}
