//! Blood-flow solve on generated tumour networks of about 1e4, 1e5 and 1e6 segments.
//! Prints `name value unit` lines: solve time, segments, CG iterations. Target: under 0.2 s for
//! 1e5 segments.

use std::time::Instant;

use interstice_sim::lattice::Lattice;
use interstice_sim::params::{Params, TumourGeometry};
use interstice_sim::process::blood::flow_options;
use interstice_sim::scenario::Scenario;
use interstice_sim::vessels::flow::solve;
use interstice_sim::vessels::generate::generate;

fn main() {
    let p = Params::resolve(&Scenario::default());
    let opt = flow_options(&p.network, &p.blood);
    for (label, target) in [("1e4", 1e4), ("1e5", 1e5), ("1e6", 1e6)] {
        // A capillary bed has about 2 segments per node (cross-link probability 0.5) and tumour
        // vessels add kinks: size the box so the network has about `target` segments.
        let s = p.network.capillary_spacing;
        let build = |m: usize| {
            let lattice = Lattice::new([m, m, m], s, [0.0; 3]);
            let r = 0.3 * m as f64 * s;
            let tumour = TumourGeometry { centre: lattice.box_centre(), semi_axes: [r; 3] };
            generate(&lattice, &tumour, &p.network, 1, true)
        };
        // The largest cube of bed with at most `target` segments.
        let mut m = ((target / 2.0f64).cbrt()).round() as usize;
        let mut net = build(m);
        while net.segments.len() as f64 > target && m > 3 {
            m -= 1;
            net = build(m);
        }
        let reps = if target > 5e5 { 1 } else { 3 };
        let mut best = f64::INFINITY;
        let mut iterations = 0;
        for _ in 0..reps {
            let t0 = Instant::now();
            let f = solve(&net, &opt).expect("flow solve");
            best = best.min(t0.elapsed().as_secs_f64());
            iterations = f.iterations;
        }
        println!("blood_flow_segments_{label} {} 1", net.segments.len());
        println!("blood_flow_solve_{label} {best:.4} s");
        println!("blood_flow_cg_iterations_{label} {iterations} 1");
    }
}
