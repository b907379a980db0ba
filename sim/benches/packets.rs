//! Packet transport with binding on a heterogeneous 128^3 lattice: packet-steps per second and
//! memory per packet, at 1e5, 1e6 and 1e7 packets. Prints `name value unit` lines.
//! The plasma dose is small (1e10 particles), so the influx adds about a hundred packets a step
//! and each size stays at its label (`packets_mean_per_step_<size>` says so): with the default
//! dose of 1e13 the influx added about 1.3e5 packets a step, and the "1e5" size ran at 2.5e6.
//! Usage: cargo bench --bench packets [-- N ...]   (default: 1e5 1e6 1e7)

use std::path::Path;
use std::time::Instant;

use interstice_sim::particles::Packets;
use interstice_sim::world::PhaseTimes;
use interstice_sim::{LoadedScenario, Simulation};

mod common;
use common::{SCENARIO, fill};

fn peak_rss_bytes() -> f64 {
    std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| s.lines().find(|l| l.starts_with("VmHWM:")).map(|l| l.to_string()))
        .and_then(|l| l.split_whitespace().nth(1).and_then(|v| v.parse::<f64>().ok()))
        .map_or(f64::NAN, |kb| kb * 1024.0)
}

fn current_rss_bytes() -> f64 {
    std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| s.lines().find(|l| l.starts_with("VmRSS:")).map(|l| l.to_string()))
        .and_then(|l| l.split_whitespace().nth(1).and_then(|v| v.parse::<f64>().ok()))
        .map_or(f64::NAN, |kb| kb * 1024.0)
}

fn main() {
    let args: Vec<usize> = std::env::args().skip(1).filter_map(|a| a.parse::<f64>().ok()).map(|v| v as usize).collect();
    let sizes = if args.is_empty() { vec![100_000, 1_000_000, 10_000_000] } else { args };
    // BENCH_RADIUS_NM sets the particle's radius (default 50 nm): smaller particles diffuse
    // farther per step and take more sub-steps.
    let text = match std::env::var("BENCH_RADIUS_NM") {
        Ok(r) => SCENARIO.replace("hydrodynamic_radius_nm = 50.0", &format!("hydrodynamic_radius_nm = {r}")),
        Err(_) => SCENARIO.to_string(),
    };
    let loaded = LoadedScenario::from_text(Path::new("bench.toml"), text).expect("scenario");
    let mut sim = Simulation::new(&loaded).expect("world");
    let l = sim.lattice().clone();
    sim.step().expect("first step");
    for (k, &n) in sizes.iter().enumerate() {
        let before = current_rss_bytes();
        fill(&mut sim, n);
        let after = current_rss_bytes();
        let steps = std::env::var("BENCH_STEPS").ok().and_then(|s| s.parse().ok()).unwrap_or(if n >= 10_000_000 {
            3
        } else if n >= 1_000_000 {
            10
        } else {
            40
        });
        // One step to settle buffers, then timed steps.
        sim.step().expect("step");
        // Packet-steps: the packets at the start of each step (the count grows as desorbed and
        // released particles leave as new packets).
        let mut packet_steps = 0usize;
        sim.world.insert_resource(PhaseTimes::default());
        let t0 = Instant::now();
        for _ in 0..steps {
            packet_steps += sim.world.resource::<Packets>().len();
            sim.step().expect("step");
        }
        let dt = t0.elapsed().as_secs_f64();
        // Where the timed steps went, per process set, ms per step.
        let label = format!("{:.0e}", n as f64);
        for (phase, s) in sim.world.resource::<PhaseTimes>().by_phase() {
            if s > 0.0 {
                println!("step_{}_{label} {:.2} ms", phase.name(), s * 1e3 / steps as f64);
            }
        }
        // The motion kernel alone, on the same packets and fields (BENCH_WHOLE_ONLY skips it).
        if std::env::var("BENCH_WHOLE_ONLY").is_err() {
            use interstice_sim::process::transport::{
                Drift, DualGrid, FaceVelocity, MotionCache, MotionFields, TransportParams, move_packets,
                move_packets_packed, substeps,
            };
            let fields = sim.world.resource::<MotionFields>().clone();
            let vel = sim.world.resource::<FaceVelocity>().clone();
            let tp = sim.world.resource::<TransportParams>().clone();
            let packed = MotionCache::build(&l, &fields, &vel);
            let mut p = sim.world.resource::<Packets>().clone();
            let t1 = Instant::now();
            for k in 0..steps {
                move_packets_packed(&l, &packed, &tp, &mut p, 1, k as u64, 20.0, Drift::Ito);
            }
            let d1 = t1.elapsed().as_secs_f64();
            // The same packets with every packet on the fine sub-steps (no uniform marks).
            {
                let mut fine = fields.clone();
                fine.uniform_radius.clear();
                let fine = MotionCache::build(&l, &fine, &vel);
                let mut p2 = sim.world.resource::<Packets>().clone();
                let t2 = Instant::now();
                for k in 0..steps {
                    move_packets_packed(&l, &fine, &tp, &mut p2, 1, k as u64, 20.0, Drift::Ito);
                }
                let d2 = t2.elapsed().as_secs_f64();
                println!(
                    "packet_motion_fine_substeps_only_{:.0e} {:.3e} 1/s",
                    n as f64,
                    (p2.len() * steps) as f64 / d2
                );
                // And the marked fields again, now that the fine run has warmed the same memory.
                let mut p3 = sim.world.resource::<Packets>().clone();
                let t3 = Instant::now();
                for k in 0..steps {
                    move_packets_packed(&l, &packed, &tp, &mut p3, 1, k as u64, 20.0, Drift::Ito);
                }
                println!(
                    "packet_motion_steps_per_s_warm_{:.0e} {:.3e} 1/s",
                    n as f64,
                    (p3.len() * steps) as f64 / t3.elapsed().as_secs_f64()
                );
            }
            if std::env::var("BENCH_DIAG").is_ok() {
                let (mut uni, mut adv, mut reach) = (0usize, 0usize, 0usize);
                let (mut sub, mut diff_sub, mut umax_sum) = (0.0f64, 0.0f64, 0.0f64);
                let h = l.h;
                for i in 0..p.len() {
                    let v = p.voxel[i] as usize;
                    let [ii, jj, kk] = l.ijk(v);
                    // The dual cell at the voxel's centre (the diagnostic's simplification).
                    let dual = DualGrid { n: l.n };
                    let centre = [ii as f64 + 0.5, jj as f64 + 0.5, kk as f64 + 0.5];
                    let radius = fields.uniform_radius[0][dual.index(dual.cell(&centre))];
                    uni += usize::from(radius >= 2);
                    let [nx, ny, _] = l.n;
                    let u = vel.x[ii + (nx + 1) * (jj + ny * kk)]
                        .abs()
                        .max(vel.y[ii + nx * (jj + (ny + 1) * kk)].abs())
                        .max(vel.z[v].abs());
                    let uv = u * 20.0 / h;
                    adv += usize::from(uv <= 0.25);
                    let d = fields.ad[0][v] / fields.a[0][v] / (h * h);
                    reach += usize::from((6.0 * d * 20.0).sqrt() <= 1.25);
                    let budget = (f64::from(radius) - 1.0).min(1.25);
                    let ns = if uv <= 0.25 && (6.0 * d * 20.0).sqrt() + uv <= budget {
                        1.0
                    } else {
                        substeps(d, u / h, 0.0, 20.0, 0.25) as f64
                    };
                    sub += ns;
                    diff_sub += substeps(d, 0.0, 0.0, 20.0, 0.25) as f64;
                    umax_sum += u;
                }
                println!(
                    "diag mean_substeps {:.2} mean_diffusive_substeps {:.2} mean_face_speed_um_s {:.3}",
                    sub / p.len() as f64,
                    diff_sub / p.len() as f64,
                    umax_sum / p.len() as f64 * 1e6
                );
                let n = p.len() as f64;
                println!(
                    "diag uniform {:.3} advective_ok {:.3} reach_ok {:.3}",
                    uni as f64 / n,
                    adv as f64 / n,
                    reach as f64 / n
                );
            }
            println!("packet_motion_steps_per_s_{:.0e} {:.3e} 1/s", n as f64, (p.len() * steps) as f64 / d1);
            if std::env::var("BENCH_SMALL").is_ok() {
                let small = interstice_sim::lattice::Lattice::new([16, 16, 16], l.h * 8.0, l.origin);
                let f2 = MotionFields::uniform(&small, 1e-13, 0.4);
                let v2 = FaceVelocity::zero(&small);
                let mut p2 = Packets::default();
                for i in 0..p.len() {
                    p2.push(&small, p.pos[i], 0, 1000);
                }
                let t2 = Instant::now();
                for k in 0..steps {
                    move_packets(&small, &f2, &v2, &tp, &mut p2, 1, k as u64, 20.0, Drift::Ito);
                }
                println!(
                    "packet_motion_small_lattice_{:.0e} {:.3e} 1/s",
                    n as f64,
                    (p2.len() * steps) as f64 / t2.elapsed().as_secs_f64()
                );
            }
        }
        println!("packet_steps_per_s_{label} {:.3e} 1/s", packet_steps as f64 / dt);
        println!("packets_mean_per_step_{label} {:.3e} 1", packet_steps as f64 / steps as f64);
        // Resident growth while the packets were created, for the first size only (a later size
        // reuses memory an earlier one freed, and reads low or negative), and the packet
        // table's own heap after the timed steps, for every size.
        if k == 0 {
            println!("packet_memory_per_packet_{label} {:.1} B", (after - before) / n as f64);
        }
        let table = sim.world.resource::<Packets>();
        println!("packet_table_bytes_per_packet_{label} {:.1} B", table.heap_bytes() as f64 / table.len() as f64);
        println!("packet_peak_rss_{label} {:.1} MB", peak_rss_bytes() / 1e6);
    }
}
