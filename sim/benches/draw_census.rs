//! What the random draws alone of a packet step cost: the packet bench's world with 1e6 packets
//! (`common`), a census of every binomial draw and stream opening over a few steps (feature
//! `draw-census`), and a replay of those draws on one thread, each from a fresh stream as the
//! engine draws them. Their time over two threads bounds the packet-steps per second that the
//! step can reach on this machine with these samplers, before moving a packet or reading a
//! field. Prints `name value unit` lines.
//! Usage: cargo bench -p interstice-sim --features draw-census --bench draw_census [-- N]

use std::hint::black_box;
use std::path::Path;
use std::time::Instant;

use interstice_sim::particles::Packets;
use interstice_sim::rng::census::{self, Draw};
use interstice_sim::rng::{Domain, Streams};
use interstice_sim::{LoadedScenario, Simulation};

mod common;
use common::{SCENARIO, fill};

fn main() {
    let n = std::env::args().skip(1).find_map(|a| a.parse::<f64>().ok()).map_or(1_000_000, |v| v as usize);
    let loaded = LoadedScenario::from_text(Path::new("bench.toml"), SCENARIO.to_string()).expect("scenario");
    let mut sim = Simulation::new(&loaded).expect("world");
    sim.step().expect("first step");
    fill(&mut sim, n);
    // A few steps to settle, then the census.
    for _ in 0..3 {
        sim.step().expect("step");
    }
    let steps = 4;
    let mut packet_steps = 0;
    census::start();
    for _ in 0..steps {
        packet_steps += sim.world.resource::<Packets>().len();
        sim.step().expect("step");
    }
    let (draws, opened) = census::stop();
    // The replay: every draw from a fresh stream (best of three).
    let streams = Streams::new(3, Domain::Binding);
    let replay = |rep: u64| {
        let t = Instant::now();
        let mut acc = 0u64;
        for (i, d) in draws.iter().enumerate() {
            let mut s = streams.at(i as u64, rep);
            acc = acc.wrapping_add(match *d {
                Draw::Rate(n, x) => s.binomial_of_rate(n, x),
                Draw::Probability(n, p) => s.binomial(n, p),
            });
        }
        black_box(acc);
        t.elapsed().as_secs_f64()
    };
    let replayed = (0..3).map(replay).fold(f64::INFINITY, f64::min);
    // Opening `k` streams and drawing once from each.
    let open = |k: u64| {
        let t = Instant::now();
        let mut acc = 0u64;
        for i in 0..k {
            acc = acc.wrapping_add(streams.at(i, 9).next_u64());
        }
        black_box(acc);
        t.elapsed().as_secs_f64()
    };
    // The replay opened a stream per draw: take that off, the engine's openings are counted apart.
    let binomials = (replayed - open(draws.len() as u64)).max(0.0);
    let openings = open(opened);
    let label = format!("{:.0e}", n as f64);
    let per = |x: f64| x / steps as f64;
    println!("draws_binomial_per_step_{label} {:.4e} 1", per(draws.len() as f64));
    println!(
        "draws_binomial_of_rate_per_step_{label} {:.4e} 1",
        per(draws.iter().filter(|d| matches!(d, Draw::Rate(..))).count() as f64)
    );
    println!("draws_streams_opened_per_step_{label} {:.4e} 1", per(opened as f64));
    println!("draws_binomial_one_thread_{label} {:.2} ms", per(binomials) * 1e3);
    println!("draws_streams_one_thread_{label} {:.2} ms", per(openings) * 1e3);
    println!(
        "draws_bound_packet_steps_per_s_two_threads_{label} {:.3e} 1/s",
        packet_steps as f64 / ((binomials + openings) / 2.0)
    );
}
