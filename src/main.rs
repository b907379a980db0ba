//! `interstice`: the command line of the simulator.

use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Parser, Subcommand};
use interstice_sim::scenario::{LoadedScenario, defaults_table};
use interstice_sim::{RunOptions, Simulation, check, provenance};

/// Simulates how nanoparticles travel from the blood into and through a solid tumour.
#[derive(Parser)]
#[command(name = "interstice", version, about, long_about = None, after_help = provenance::CAUTION)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Run a scenario and write its run file (HDF5) and XDMF sidecar.
    Run {
        /// Scenario file (TOML).
        scenario: PathBuf,
        /// Folder for the run file.
        #[arg(short, long, default_value = "runs")]
        out: PathBuf,
        /// Worker threads (0: all cores). Results do not depend on it.
        #[arg(short = 'j', long, default_value_t = 0)]
        threads: usize,
        /// Print nothing but errors.
        #[arg(short, long)]
        quiet: bool,
    },
    /// Validate a scenario and print the derived quantities of each process.
    Check {
        /// Scenario file (TOML).
        scenario: PathBuf,
        /// Also print every parameter after defaults are applied.
        #[arg(long)]
        resolved: bool,
    },
    /// Print every scenario key with its default, unit and allowed values.
    Defaults,
    /// Print the version and build provenance.
    Version,
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    match run(cli) {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("error: {e}");
            let mut src = e.source();
            while let Some(s) = src {
                eprintln!("  caused by: {s}");
                src = s.source();
            }
            ExitCode::FAILURE
        }
    }
}

fn set_threads(threads: usize) -> Result<(), Box<dyn std::error::Error>> {
    if threads > 0 {
        rayon::ThreadPoolBuilder::new().num_threads(threads).build_global()?;
    }
    Ok(())
}

fn run(cli: Cli) -> Result<(), Box<dyn std::error::Error>> {
    match cli.command {
        Command::Run { scenario, out, threads, quiet } => {
            set_threads(threads)?;
            let loaded = LoadedScenario::from_file(&scenario)?;
            let mut sim = Simulation::new(&loaded)?;
            let opts = RunOptions { out_dir: out, threads, quiet };
            let summary = sim.run(&loaded, &opts)?;
            if !quiet {
                eprintln!(
                    "interstice: wrote {} ({} snapshots, {} steps, {:.1} s)",
                    summary.file.display(),
                    summary.snapshots,
                    summary.steps,
                    summary.wall_time_s
                );
            }
        }
        Command::Check { scenario, resolved } => {
            let loaded = LoadedScenario::from_file(&scenario)?;
            println!("{}: valid scenario", scenario.display());
            print!("{}", check::render(&check::derived(&loaded)?));
            if resolved {
                println!("\n# resolved parameters (defaults applied)\n{}", loaded.scenario);
            }
        }
        Command::Defaults => print!("{}", defaults_table()),
        Command::Version => {
            println!("{}", provenance::build_line());
            println!("{}", provenance::CAUTION);
        }
    }
    Ok(())
}
