//! Snapshot write rate for a 128^3 field set. Prints `name value unit` lines.

use std::time::Instant;

use interstice_sim::field::{Field, FieldRef};
use interstice_sim::io::RunWriter;
use interstice_sim::lattice::Lattice;

fn main() {
    let n = 128;
    let lattice = Lattice::new([n, n, n], 1e-5, [0.0; 3]);
    let len = lattice.len();
    // A smooth field set, like pressure or concentration fields (compresses as real fields do).
    let names = ["f0", "f1", "f2", "f3", "f4", "f5"];
    let fields: Vec<Field> = names
        .iter()
        .enumerate()
        .map(|(s, name)| {
            let mut f = Field::filled(name, "1", "benchmark field", len, 0.0);
            for (i, v) in f.data.iter_mut().enumerate() {
                let [x, y, z] = lattice.ijk(i);
                *v = ((x as f64 * 0.05 + s as f64).sin() * (y as f64 * 0.07).cos() + z as f64 * 1e-3) * 1e3;
            }
            f
        })
        .collect();
    let bytes = (len * 8 * fields.len()) as f64;
    let dir = tempfile::tempdir().expect("temporary folder");
    for level in [0u8, 1, 4] {
        let path = dir.path().join(format!("bench{level}.h5"));
        let mut w = RunWriter::create(&path, &lattice, &[], "", "", level, false).expect("run file");
        let reps = 3;
        let t0 = Instant::now();
        for r in 0..reps {
            let mut s = w.begin_snapshot(r as f64, r).expect("snapshot");
            for f in &fields {
                s.field(FieldRef::F64(f)).expect("field");
            }
            s.finish().expect("finish");
        }
        let dt = t0.elapsed().as_secs_f64() / reps as f64;
        w.close("finished").expect("close");
        let size = std::fs::metadata(&path).map(|m| m.len()).unwrap_or(0) as f64 / reps as f64;
        println!("snapshot_write_128cubed_6fields_deflate{level} {:.1} MB/s", bytes / dt / 1e6);
        println!("snapshot_size_ratio_deflate{level} {:.3} 1", size / bytes);
    }
}
