//! Writes the example run of `interstice_analysis::synthetic::example` to the path given.
//! Usage: cargo run -p interstice-analysis --example example_run -- OUT.h5

fn main() {
    let Some(path) = std::env::args().nth(1) else {
        eprintln!("usage: example_run OUT.h5");
        std::process::exit(2);
    };
    let run = interstice_analysis::synthetic::example(&Default::default());
    if let Err(e) = run.write(std::path::Path::new(&path)) {
        eprintln!("{path}: {e}");
        std::process::exit(1);
    }
}
