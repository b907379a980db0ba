//! The random draws of the packet step, one kind at a time: nanoseconds per draw on one
//! thread, each from a fresh stream as the kernels open them (one per packet and step).
//! Prints `name value unit` lines.

use std::hint::black_box;
use std::time::Instant;

use interstice_sim::rng::{Domain, Streams};

const DRAWS: u64 = 4_000_000;

/// Nanoseconds per call of `f` on stream `i` (median of five runs).
fn time(mut f: impl FnMut(&mut interstice_sim::rng::Stream) -> u64) -> f64 {
    let streams = Streams::new(1, Domain::Binding);
    let mut runs: Vec<f64> = (0..5)
        .map(|r| {
            let t = Instant::now();
            let mut acc = 0u64;
            for i in 0..DRAWS {
                let mut s = streams.at(i, r);
                acc = acc.wrapping_add(f(&mut s));
            }
            black_box(acc);
            t.elapsed().as_secs_f64() * 1e9 / DRAWS as f64
        })
        .collect();
    runs.sort_by(f64::total_cmp);
    runs[2]
}

fn main() {
    println!("draw_stream_open {:.2} ns", time(|s| s.next_u64()));
    println!("draw_uniform3 {:.2} ns", time(|s| s.unit_variance_uniform3()[0].to_bits()));
    println!("draw_normal {:.2} ns", time(|s| s.normal().to_bits()));
    // Binomials of a packet of 1000 particles at the means of the packet bench's reactions:
    // host packets (adsorption and drainage, means 3-10), tumour packets by a cell (binding,
    // mean about 190), rare reactions (mean 0.02), and the small shares of the split; a cell's
    // split of its leaving particles between internalisation and release (p near 1).
    for (n, x) in [(1000u64, 2e-5), (1000, 5e-4), (1000, 5e-3), (1000, 0.015), (1000, 0.187), (10_000, 0.004)] {
        let mean = format!("{}", n as f64 * x).replace('.', "p");
        println!("draw_binomial_of_rate_n{n}_mean{mean} {:.2} ns", time(|s| s.binomial_of_rate(n, x)));
    }
    for (n, p) in [(5u64, 0.05), (12, 0.3), (40, 0.05), (40, 0.99995), (200, 0.05), (200, 0.95)] {
        let prob = format!("{p}").replace('.', "p");
        println!("draw_binomial_n{n}_p{prob} {:.2} ns", time(|s| s.binomial(n, p)));
    }
}
