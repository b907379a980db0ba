//! What the `interstice` analysis subcommands do, with plain arguments: the binary only parses.

use std::io::IsTerminal;
use std::path::{Path, PathBuf};

use indicatif::{ProgressBar, ProgressStyle};

use crate::error::{AnalysisError, Result};
use crate::figures::{self, Axis};
use crate::metrics::{Options, RunMetrics, analyse};
use crate::plot;
use crate::report;
use crate::runfile::RunFile;
use crate::tables::{self, species_time_rows, summary_rows};

/// Options shared by every analysis subcommand.
#[derive(Debug, Clone, PartialEq)]
pub struct AnalysisArgs {
    /// Coverage threshold, internalised particles per cancer cell.
    pub threshold: f64,
    /// Tissue density, g/mL.
    pub density_g_per_ml: f64,
    /// Profile bin width, µm (default: the voxel size).
    pub bin_um: Option<f64>,
    /// Species to analyse (empty: all).
    pub species: Vec<String>,
    /// No progress bar.
    pub quiet: bool,
}

impl Default for AnalysisArgs {
    fn default() -> Self {
        let o = Options::default();
        AnalysisArgs {
            threshold: o.threshold_particles,
            density_g_per_ml: o.density_kg_per_m3 / 1000.0,
            bin_um: None,
            species: Vec::new(),
            quiet: false,
        }
    }
}

impl AnalysisArgs {
    /// The options of [`analyse`], in SI.
    pub fn options(&self) -> Options {
        Options {
            density_kg_per_m3: self.density_g_per_ml * 1000.0,
            threshold_particles: self.threshold,
            bin_width_m: self.bin_um.map(|b| b * 1e-6),
            species: self.species.clone(),
            ..Options::default()
        }
    }
}

fn bar(len: u64, quiet: bool, msg: String) -> ProgressBar {
    if quiet || !std::io::stderr().is_terminal() {
        return ProgressBar::hidden();
    }
    let pb = ProgressBar::new(len);
    if let Ok(style) = ProgressStyle::with_template("{msg} [{bar:30}] {pos}/{len} snapshots ({elapsed})") {
        pb.set_style(style.progress_chars("=> "));
    }
    pb.set_message(msg);
    pb
}

/// Opens a run file and computes its metrics, with a progress bar on a terminal.
pub fn load(path: &Path, args: &AnalysisArgs) -> Result<(RunFile, RunMetrics)> {
    let opts = args.options();
    opts.check()?;
    let run = RunFile::open(path)?;
    let pb = bar(run.snapshots.len() as u64, args.quiet, format!("analysing {}", path.display()));
    let m = analyse(&run, &opts, &pb);
    pb.finish_and_clear();
    Ok((run, m?))
}

/// A short text summary of a run's metrics (for the terminal).
pub fn summary_text(m: &RunMetrics) -> String {
    let mut s = format!(
        "{}: {} ({} of {} snapshots analysed, status {})\n",
        m.path.display(),
        m.run,
        m.snapshots.len(),
        m.snapshot_groups,
        m.status
    );
    for sp in &m.species {
        s.push_str(&format!("species {}:\n", sp.name));
        let mut rows = summary_rows(m).into_iter().filter(|r| r.species == sp.name).collect::<Vec<_>>();
        if let Some(x) = sp.times.last() {
            rows.extend(species_time_rows(&sp.name, x).into_iter().filter(|r| {
                [
                    "tumour_percent_id",
                    "tumour_percent_id_per_g",
                    "tumour_to_host_ratio",
                    "coverage_fraction",
                    "gini_internalised",
                    "bsb_index_vessel",
                    "bsb_index_surface",
                    "surface_d50",
                    "vessel_d50",
                ]
                .contains(&r.quantity.as_str())
            }));
        }
        for r in rows {
            s.push_str(&format!("  {:<32} {:>14}  {}\n", r.quantity, report::fmt_value(r.value), r.units));
        }
    }
    for n in &m.notes {
        s.push_str(&format!("note: {n}\n"));
    }
    s.push_str(crate::CAUTION);
    s.push('\n');
    s
}

/// `metrics`: writes the tidy tables of a run into `out_dir`; returns their paths and a summary.
pub fn metrics(run: &Path, out_dir: &Path, args: &AnalysisArgs) -> Result<(Vec<PathBuf>, String)> {
    let (_, m) = load(run, args)?;
    let files = tables::write_tables(out_dir, &[&m])?;
    Ok((files, summary_text(&m)))
}

/// What `plot` draws beyond the standard charts.
#[derive(Debug, Clone, PartialEq)]
pub struct PlotArgs {
    /// Fields to slice (empty: region, porosity, pressure... and each species' total, when present).
    pub fields: Vec<String>,
    /// Snapshot of the slices (default: the last analysed).
    pub snapshot: Option<usize>,
    /// Axis normal to the slice: "x", "y" or "z".
    pub axis: String,
    /// Index of the slice along that axis (default: the middle).
    pub index: Option<usize>,
    /// Write PNG files.
    pub png: bool,
    /// Write SVG files.
    pub svg: bool,
}

impl Default for PlotArgs {
    fn default() -> Self {
        PlotArgs { fields: Vec::new(), snapshot: None, axis: "z".into(), index: None, png: true, svg: true }
    }
}

fn write(path: &Path, bytes: &[u8]) -> Result<()> {
    std::fs::write(path, bytes).map_err(AnalysisError::write(path, "the plot"))
}

/// `plot`: time courses, profiles, coverage curves and field slices as PNG and/or SVG.
pub fn plots(run: &Path, out_dir: &Path, args: &AnalysisArgs, p: &PlotArgs) -> Result<Vec<PathBuf>> {
    let axis: Axis = p.axis.parse()?;
    if !p.png && !p.svg {
        return Err(AnalysisError::option("format", "none", "png, svg or both"));
    }
    let (rf, m) = load(run, args)?;
    // Every slice is cut before anything is written: a bad field or snapshot leaves no files.
    let snap = match p.snapshot {
        Some(i) => rf.snapshot(i)?.clone(),
        None => rf.require_snapshots()?.last().cloned().expect("at least one snapshot"),
    };
    let fields = if p.fields.is_empty() {
        let species: Vec<String> = m.species.iter().map(|s| s.name.clone()).collect();
        figures::default_slice_fields(&rf, &snap, &species)?
    } else {
        p.fields.clone()
    };
    let slices = fields
        .iter()
        .map(|f| figures::slice(&rf, &snap, f, axis, p.index).map(|s| (f.clone(), s)))
        .collect::<Result<Vec<_>>>()?;
    std::fs::create_dir_all(out_dir).map_err(AnalysisError::write(out_dir, "the output folder"))?;
    let mut out = Vec::new();
    let mut save = |name: &str, png: Option<Vec<u8>>, svg: Option<String>| -> Result<()> {
        if let Some(b) = png {
            let f = out_dir.join(format!("{name}.png"));
            write(&f, &b)?;
            out.push(f);
        }
        if let Some(s) = svg {
            let f = out_dir.join(format!("{name}.svg"));
            write(&f, s.as_bytes())?;
            out.push(f);
        }
        Ok(())
    };
    for f in figures::run_figures(&m) {
        let png = if p.png { Some(plot::line_png(&f.chart, plot::SIZE)?) } else { None };
        let svg = if p.svg { Some(plot::line_svg(&f.chart, plot::SIZE)?) } else { None };
        save(&f.name, png, svg)?;
    }
    for (field, sl) in slices {
        let png = if p.png { Some(plot::slice_png(&sl, (760, 560))?) } else { None };
        let svg = if p.svg { Some(plot::slice_svg(&sl, (760, 560))?) } else { None };
        save(&format!("slice_{field}_{}_{:?}", snap.name, axis).to_lowercase(), png, svg)?;
    }
    Ok(out)
}

/// Where `report` writes by default: beside the run file, `<stem>-report.html`.
pub fn default_report_path(run: &Path) -> PathBuf {
    let stem = run.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_else(|| "run".into());
    run.with_file_name(format!("{stem}-report.html"))
}

fn write_html(path: &Path, html: &str) -> Result<()> {
    if let Some(dir) = path.parent().filter(|d| !d.as_os_str().is_empty()) {
        std::fs::create_dir_all(dir).map_err(AnalysisError::write(dir, "the output folder"))?;
    }
    std::fs::write(path, html).map_err(AnalysisError::write(path, "the report"))
}

/// `report`: the self-contained HTML report of one run; returns its path.
pub fn report(run: &Path, out: Option<&Path>, args: &AnalysisArgs) -> Result<PathBuf> {
    let (rf, m) = load(run, args)?;
    let html = report::run_report(&m, &rf)?;
    let path = out.map_or_else(|| default_report_path(run), Path::to_path_buf);
    write_html(&path, &html)?;
    Ok(path)
}

/// `compare`: the comparison page of several runs, and optionally their tables together.
pub fn compare(runs: &[PathBuf], out: &Path, csv_dir: Option<&Path>, args: &AnalysisArgs) -> Result<PathBuf> {
    if runs.len() < 2 {
        return Err(AnalysisError::option("runs", runs.len(), "at least two run files to compare"));
    }
    let mut all = Vec::new();
    for r in runs {
        // A species filter applies to the runs that hold the species.
        let mut a = args.clone();
        if !a.species.is_empty() {
            let rf = RunFile::open(r)?;
            let have = rf.species()?;
            a.species.retain(|s| have.contains(s));
            if a.species.is_empty() {
                return Err(AnalysisError::UnknownSpecies {
                    path: r.clone(),
                    species: args.species.join(", "),
                    available: have.join(", "),
                });
            }
        }
        all.push(load(r, &a)?.1);
    }
    let refs: Vec<&RunMetrics> = all.iter().collect();
    let html = report::compare_report(&refs)?;
    write_html(out, &html)?;
    if let Some(dir) = csv_dir {
        tables::write_tables(dir, &refs)?;
    }
    Ok(out.to_path_buf())
}
