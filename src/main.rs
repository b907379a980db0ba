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
        /// Continue from the run's checkpoint in the output folder, if there is one.
        #[arg(long)]
        resume: bool,
        /// Override one scenario key, e.g. --set 'intervention[0].enabled=false' (repeatable);
        /// the run file stores the scenario with the overrides applied.
        #[arg(long = "set", value_name = "KEY=VALUE")]
        overrides: Vec<String>,
    },
    /// Validate a scenario and print the derived quantities of each process.
    Check {
        /// Scenario file (TOML).
        scenario: PathBuf,
        /// Also print every parameter after defaults are applied.
        #[arg(long)]
        resolved: bool,
        /// Override one scenario key (repeatable), as for `run`.
        #[arg(long = "set", value_name = "KEY=VALUE")]
        overrides: Vec<String>,
    },
    /// Print every scenario key with its default, unit and allowed values.
    Defaults,
    /// Print the version and build provenance.
    Version,
    /// Compute the delivery metrics of a run and write them as tidy CSV tables.
    Metrics {
        /// Run file (HDF5).
        run: PathBuf,
        /// Folder for metrics.csv, summary.csv, profiles.csv, coverage.csv and series.csv.
        #[arg(short, long, default_value = "analysis")]
        out: PathBuf,
        #[command(flatten)]
        analysis: AnalysisFlags,
    },
    /// Draw time courses, penetration profiles, coverage curves and field slices (PNG, SVG).
    Plot {
        /// Run file (HDF5).
        run: PathBuf,
        /// Folder for the images.
        #[arg(short, long, default_value = "plots")]
        out: PathBuf,
        /// Field to slice (repeat for several; `total_<species>` sums a species' fields).
        /// Default: region, porosity, pressure, oxygen, vessel_surface and each species' total.
        #[arg(long = "field")]
        fields: Vec<String>,
        /// Snapshot of the slices (0-based; default: the last finished).
        #[arg(long)]
        snapshot: Option<usize>,
        /// Axis normal to the slices: x, y or z.
        #[arg(long, default_value = "z")]
        axis: String,
        /// Index of the slice along that axis (default: the middle).
        #[arg(long)]
        slice: Option<usize>,
        /// Image formats: png, svg or both.
        #[arg(long, default_value = "both", value_parser = ["png", "svg", "both"])]
        format: String,
        #[command(flatten)]
        analysis: AnalysisFlags,
    },
    /// Write a self-contained HTML report of a run (plots embedded; opens offline).
    Report {
        /// Run file (HDF5).
        run: PathBuf,
        /// Report file (default: beside the run file, <name>-report.html).
        #[arg(short, long)]
        out: Option<PathBuf>,
        #[command(flatten)]
        analysis: AnalysisFlags,
    },
    /// Compare runs side by side on one HTML page (same metrics, overlaid curves).
    Compare {
        /// Run files (HDF5), two or more.
        #[arg(required = true, num_args = 2..)]
        runs: Vec<PathBuf>,
        /// Comparison page.
        #[arg(short, long, default_value = "comparison.html")]
        out: PathBuf,
        /// Also write the tables of every run together into this folder.
        #[arg(long)]
        csv: Option<PathBuf>,
        #[command(flatten)]
        analysis: AnalysisFlags,
    },
    /// Sweeps: plan, run locally, submit to Slurm, collect, aggregate (see `interstice sweep --help`).
    Sweep {
        #[command(subcommand)]
        command: interstice_sweep::cli::SweepCommand,
    },
}

/// Options of the analysis subcommands.
#[derive(clap::Args)]
struct AnalysisFlags {
    /// Coverage threshold: internalised particles a cancer cell must exceed.
    #[arg(long, default_value_t = interstice_analysis::metrics::DEFAULT_THRESHOLD_PARTICLES, allow_negative_numbers = true)]
    threshold: f64,
    /// Tissue density for %ID per gram, g/mL.
    #[arg(long = "density-g-per-ml", default_value_t = interstice_analysis::metrics::DEFAULT_DENSITY_KG_PER_M3 / 1000.0, allow_negative_numbers = true)]
    density_g_per_ml: f64,
    /// Width of the penetration-profile bins, um (default: the voxel size).
    #[arg(long = "bin-um", allow_negative_numbers = true)]
    bin_um: Option<f64>,
    /// Species to analyse (repeat for several; default: all).
    #[arg(long)]
    species: Vec<String>,
    /// No progress bar.
    #[arg(short, long)]
    quiet: bool,
}

impl AnalysisFlags {
    fn args(&self) -> interstice_analysis::cli::AnalysisArgs {
        interstice_analysis::cli::AnalysisArgs {
            threshold: self.threshold,
            density_g_per_ml: self.density_g_per_ml,
            bin_um: self.bin_um,
            species: self.species.clone(),
            quiet: self.quiet,
        }
    }
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

/// Reads a scenario and applies `KEY=VALUE` overrides to its TOML before checking it. A value
/// is read as TOML (number, boolean, quoted string, array), or else taken as a bare string.
fn load(file: &std::path::Path, overrides: &[String]) -> Result<LoadedScenario, Box<dyn std::error::Error>> {
    if overrides.is_empty() {
        return Ok(LoadedScenario::from_file(file)?);
    }
    let text =
        std::fs::read_to_string(file).map_err(|e| format!("{}: cannot read the scenario: {e}", file.display()))?;
    let mut table: toml::Table =
        toml::from_str(&text).map_err(|e| format!("{}: not valid TOML: {}", file.display(), e.message()))?;
    for o in overrides {
        let (key, raw) =
            o.split_once('=').ok_or_else(|| format!("--set {o:?}: expected KEY=VALUE, e.g. run.seed=7"))?;
        let value = toml::from_str::<toml::Table>(&format!("v = {raw}"))
            .ok()
            .and_then(|mut t| t.remove("v"))
            .unwrap_or_else(|| toml::Value::String(raw.to_string()));
        interstice_sweep::plan::set_path(&mut table, key.trim(), value)
            .map_err(|e| format!("{}: --set {o:?}: {e}", file.display()))?;
    }
    let header: String = overrides.iter().map(|o| format!("# --set {o}\n")).collect();
    let text = format!("{header}{}", toml::to_string(&table)?);
    Ok(LoadedScenario::from_text(file, text)?)
}

fn run(cli: Cli) -> Result<(), Box<dyn std::error::Error>> {
    match cli.command {
        Command::Run { scenario, out, threads, quiet, resume, overrides } => {
            set_threads(threads)?;
            let loaded = load(&scenario, &overrides)?;
            let mut sim = Simulation::new(&loaded)?;
            let opts = RunOptions { out_dir: out, threads, quiet, resume };
            let summary = sim.run(&loaded, &opts)?;
            if !quiet {
                eprintln!(
                    "interstice: wrote {} ({} snapshots, {} steps, {:.1} s)",
                    summary.file.display(),
                    summary.snapshots,
                    summary.steps,
                    summary.wall_time_s
                );
                eprintln!("interstice: time by process: {}", summary.phase_times.summary());
            }
        }
        Command::Check { scenario, resolved, overrides } => {
            let loaded = load(&scenario, &overrides)?;
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
        Command::Metrics { run, out, analysis } => {
            let (files, summary) = interstice_analysis::cli::metrics(&run, &out, &analysis.args())?;
            print!("{summary}");
            for f in files {
                eprintln!("interstice: wrote {}", f.display());
            }
        }
        Command::Plot { run, out, fields, snapshot, axis, slice, format, analysis } => {
            let p = interstice_analysis::cli::PlotArgs {
                fields,
                snapshot,
                axis,
                index: slice,
                png: format != "svg",
                svg: format != "png",
            };
            let files = interstice_analysis::cli::plots(&run, &out, &analysis.args(), &p)?;
            eprintln!("interstice: wrote {} images into {}", files.len(), out.display());
        }
        Command::Report { run, out, analysis } => {
            let path = interstice_analysis::cli::report(&run, out.as_deref(), &analysis.args())?;
            eprintln!("interstice: wrote {}", path.display());
        }
        Command::Compare { runs, out, csv, analysis } => {
            let path = interstice_analysis::cli::compare(&runs, &out, csv.as_deref(), &analysis.args())?;
            eprintln!("interstice: wrote {}", path.display());
        }
        Command::Sweep { command } => interstice_sweep::cli::main(command)?,
    }
    Ok(())
}
