//! Tidy CSV tables of the metrics: one row per run, species, time and quantity, with units.
//!
//! | file | columns |
//! |---|---|
//! | `metrics.csv` | run, species, time_s, quantity, value, units |
//! | `summary.csv` | run, species, quantity, value, units |
//! | `profiles.csv` | run, species, time_s, reference, bin_lo_m, bin_hi_m, quantity, value, units |
//! | `coverage.csv` | run, species, time_s, threshold_particles, quantity, value, units |
//! | `series.csv` | run, time_s, quantity, value, units |
//!
//! `species` is empty for quantities of the whole run (volumes, fluid balance). Values that do
//! not exist (a mean over an empty bin, a ratio over zero) are written `NA`, which pandas and R
//! read as missing. Numbers are written with the shortest decimal form that reads back exactly.

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use crate::error::{AnalysisError, Result};
use crate::metrics::{Profile, RunMetrics, SpeciesTime};

/// One tidy row of `metrics.csv` (time set) or `summary.csv` (time `None`).
#[derive(Debug, Clone, PartialEq)]
pub struct Row {
    /// Species, empty for the whole run.
    pub species: String,
    /// Simulated time, s.
    pub time_s: Option<f64>,
    /// Quantity name.
    pub quantity: String,
    /// Value.
    pub value: f64,
    /// Units (UDUNITS spelling; `1` dimensionless; `percent` for %ID).
    pub units: String,
}

/// Formats a number for CSV: `NA` when not finite.
pub fn num(v: f64) -> String {
    if v.is_finite() { format!("{v:?}") } else { "NA".into() }
}

/// Quotes a CSV text cell when it needs it (RFC 4180).
pub fn text(s: &str) -> String {
    if s.contains([',', '"', '\n', '\r']) { format!("\"{}\"", s.replace('"', "\"\"")) } else { s.to_string() }
}

fn push(rows: &mut Vec<Row>, species: &str, t: Option<f64>, q: impl Into<String>, v: Option<f64>, units: &str) {
    if let Some(v) = v {
        rows.push(Row {
            species: species.to_string(),
            time_s: t,
            quantity: q.into(),
            value: v,
            units: units.to_string(),
        });
    }
}

fn profile_scalars(rows: &mut Vec<Row>, s: &str, t: Option<f64>, p: &Profile) {
    let r = p.reference.name();
    push(rows, s, t, format!("{r}_mean_distance"), Some(p.mean_distance_m), "m");
    push(rows, s, t, format!("{r}_d50"), Some(p.d50_m), "m");
    push(rows, s, t, format!("{r}_d90"), Some(p.d90_m), "m");
    push(rows, s, t, format!("{r}_index_total"), p.index_total, "1");
    push(rows, s, t, format!("{r}_index_free"), p.index_free, "1");
    push(rows, s, t, format!("bsb_index_{r}"), p.index_bound, "1");
}

/// The per-time rows of one species at one snapshot.
pub fn species_time_rows(s: &str, x: &SpeciesTime) -> Vec<Row> {
    let mut rows = Vec::new();
    let t = Some(x.time_s);
    let any = x.tumour.named().iter().any(|c| c.1.is_some());
    if any {
        push(&mut rows, s, t, "tumour_total", Some(x.tumour.total()), "particles");
        push(&mut rows, s, t, "host_total", Some(x.host.total()), "particles");
    }
    let total = x.tumour.total();
    for (name, v) in x.tumour.named() {
        push(&mut rows, s, t, format!("tumour_{name}"), v, "particles");
        push(&mut rows, s, t, format!("tumour_fraction_{name}"), v.map(|v| v / total).filter(|v| v.is_finite()), "1");
    }
    for (name, v) in x.host.named() {
        push(&mut rows, s, t, format!("host_{name}"), v, "particles");
    }
    push(&mut rows, s, t, "tumour_percent_id", x.tumour_percent_id, "percent");
    push(&mut rows, s, t, "tumour_percent_id_per_g", x.tumour_percent_id_per_g, "percent g-1");
    push(&mut rows, s, t, "host_percent_id", x.host_percent_id, "percent");
    push(&mut rows, s, t, "host_percent_id_per_g", x.host_percent_id_per_g, "percent g-1");
    push(&mut rows, s, t, "tumour_to_host_ratio", x.tumour_to_host, "1");
    if let Some(c) = &x.coverage {
        push(&mut rows, s, t, "coverage_threshold", Some(c.threshold), "particles");
        push(&mut rows, s, t, "coverage_fraction", Some(c.fraction), "1");
    }
    if let Some(sp) = &x.spread {
        push(&mut rows, s, t, "cancer_cells", Some(sp.cancer_cells as f64), "1");
        push(&mut rows, s, t, "mean_internalised_per_cancer_cell", Some(sp.mean_internalised), "particles");
        push(&mut rows, s, t, "cv_internalised", Some(sp.cv_internalised), "1");
        push(&mut rows, s, t, "gini_internalised", Some(sp.gini_internalised), "1");
        push(&mut rows, s, t, "cv_cell_associated", sp.cv_associated, "1");
        push(&mut rows, s, t, "gini_cell_associated", sp.gini_associated, "1");
    }
    for p in [&x.vessel_profile, &x.depth_profile].into_iter().flatten() {
        profile_scalars(&mut rows, s, t, p);
    }
    if let Some(b) = &x.balance {
        push(&mut rows, s, t, "balance_injected", Some(b.injected), "particles");
        push(&mut rows, s, t, "balance_accounted", Some(b.accounted), "particles");
        push(&mut rows, s, t, "balance_residual", Some(b.residual), "particles");
        push(&mut rows, s, t, "balance_relative_residual", Some(b.relative_residual), "1");
    }
    rows
}

/// Every per-time row of a run: run-wide quantities, then each species.
pub fn metric_rows(m: &RunMetrics) -> Vec<Row> {
    let mut rows = Vec::new();
    for (i, snap) in m.snapshots.iter().enumerate() {
        let t = Some(snap.time_s);
        push(&mut rows, "", t, "tumour_volume", Some(m.tumour_volume_m3[i]), "m3");
        push(&mut rows, "", t, "host_volume", Some(m.host_volume_m3[i]), "m3");
        push(&mut rows, "", t, "perfused_segments", m.perfused_segments[i].map(|n| n as f64), "1");
        push(&mut rows, "", t, "cancer_cells", m.cancer_cells[i].map(|n| n as f64), "1");
        for f in m.fluid_series() {
            rows.push(Row {
                species: String::new(),
                time_s: t,
                quantity: f.name.clone(),
                value: f.values[i],
                units: f.units.clone(),
            });
        }
    }
    for sp in &m.species {
        for x in &sp.times {
            rows.extend(species_time_rows(&sp.name, x));
        }
    }
    rows
}

/// The time-course scalars of every species.
pub fn summary_rows(m: &RunMetrics) -> Vec<Row> {
    let mut rows = Vec::new();
    for sp in &m.species {
        let s = &sp.name;
        let x = &sp.summary;
        push(&mut rows, s, None, "dose_injected", sp.dose_particles, "particles");
        push(&mut rows, s, None, "auc_tumour_percent_id_per_g", x.auc_percent_id_per_g_s, "percent g-1 s");
        push(&mut rows, s, None, "auc_tumour_total", x.auc_particles_s, "particles s");
        push(&mut rows, s, None, "peak_tumour_percent_id_per_g", x.peak_percent_id_per_g, "percent g-1");
        push(&mut rows, s, None, "time_to_peak", x.time_to_peak_s, "s");
        push(&mut rows, s, None, "peak_tumour_percent_id", x.peak_percent_id, "percent");
    }
    rows
}

fn write_file(path: &Path, body: &str) -> Result<()> {
    if let Some(dir) = path.parent().filter(|d| !d.as_os_str().is_empty()) {
        std::fs::create_dir_all(dir).map_err(AnalysisError::write(dir, "the output folder"))?;
    }
    std::fs::write(path, body).map_err(AnalysisError::write(path, "the table"))
}

/// `metrics.csv` text for several runs.
pub fn metrics_csv(runs: &[&RunMetrics]) -> String {
    let mut out = String::from("run,species,time_s,quantity,value,units\n");
    for m in runs {
        for r in metric_rows(m) {
            let t = r.time_s.map_or("NA".to_string(), num);
            let _ = writeln!(
                out,
                "{},{},{t},{},{},{}",
                text(&m.run),
                text(&r.species),
                text(&r.quantity),
                num(r.value),
                text(&r.units)
            );
        }
    }
    out
}

/// `summary.csv` text for several runs.
pub fn summary_csv(runs: &[&RunMetrics]) -> String {
    let mut out = String::from("run,species,quantity,value,units\n");
    for m in runs {
        for r in summary_rows(m) {
            let _ = writeln!(
                out,
                "{},{},{},{},{}",
                text(&m.run),
                text(&r.species),
                text(&r.quantity),
                num(r.value),
                text(&r.units)
            );
        }
    }
    out
}

/// `profiles.csv` text for several runs.
pub fn profiles_csv(runs: &[&RunMetrics]) -> String {
    let mut out = String::from("run,species,time_s,reference,bin_lo_m,bin_hi_m,quantity,value,units\n");
    let comp = ["free", "bound_cells", "internalised", "bound_matrix"];
    for m in runs {
        for sp in &m.species {
            for x in &sp.times {
                for p in [&x.vessel_profile, &x.depth_profile].into_iter().flatten() {
                    for b in &p.bins {
                        let mut line = |q: &str, v: f64, u: &str| {
                            let _ = writeln!(
                                out,
                                "{},{},{},{},{},{},{q},{},{u}",
                                text(&m.run),
                                text(&sp.name),
                                num(x.time_s),
                                p.reference.name(),
                                num(b.lo_m),
                                num(b.hi_m),
                                num(v)
                            );
                        };
                        line("voxels", b.voxels as f64, "1");
                        line("mean_total", b.mean_total, "m-3");
                        for (c, name) in comp.iter().enumerate() {
                            if let Some(v) = b.mean[c] {
                                line(&format!("mean_{name}"), v, "m-3");
                            }
                        }
                        line("amount_total", b.amount, "particles");
                    }
                }
            }
        }
    }
    out
}

/// `coverage.csv` text for several runs.
pub fn coverage_csv(runs: &[&RunMetrics]) -> String {
    let mut out = String::from("run,species,time_s,threshold_particles,quantity,value,units\n");
    for m in runs {
        for sp in &m.species {
            for x in &sp.times {
                if let Some(c) = &x.coverage {
                    for (t, f) in &c.curve {
                        let _ = writeln!(
                            out,
                            "{},{},{},{},coverage_fraction,{},1",
                            text(&m.run),
                            text(&sp.name),
                            num(x.time_s),
                            num(*t),
                            num(*f)
                        );
                    }
                }
            }
        }
    }
    out
}

/// `series.csv` text for several runs.
pub fn series_csv(runs: &[&RunMetrics]) -> String {
    let mut out = String::from("run,time_s,quantity,value,units\n");
    for m in runs {
        for s in &m.series {
            for (i, v) in s.values.iter().enumerate() {
                let _ = writeln!(
                    out,
                    "{},{},{},{},{}",
                    text(&m.run),
                    num(m.snapshots[i].time_s),
                    text(&s.name),
                    num(*v),
                    text(&s.units)
                );
            }
        }
    }
    out
}

/// Writes the five tables of `runs` into `dir`; returns their paths.
pub fn write_tables(dir: &Path, runs: &[&RunMetrics]) -> Result<Vec<PathBuf>> {
    let files = [
        ("metrics.csv", metrics_csv(runs)),
        ("summary.csv", summary_csv(runs)),
        ("profiles.csv", profiles_csv(runs)),
        ("coverage.csv", coverage_csv(runs)),
        ("series.csv", series_csv(runs)),
    ];
    let mut out = Vec::new();
    for (name, body) in files {
        let p = dir.join(name);
        write_file(&p, &body)?;
        out.push(p);
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    // Known answers by hand (RFC 4180 quoting; Rust's shortest round-trip float formatting).
    #[test]
    fn csv_cells_by_hand() {
        assert_eq!(text("a,b"), "\"a,b\"");
        assert_eq!(text("say \"x\""), "\"say \"\"x\"\"\"");
        assert_eq!(text("plain"), "plain");
        assert_eq!(num(f64::NAN), "NA");
        assert_eq!(num(f64::INFINITY), "NA");
        assert_eq!(num(0.1), "0.1");
        assert_eq!(num(1e20), "1e20");
        assert_eq!(num(2.5e-7).parse::<f64>().unwrap(), 2.5e-7);
    }
}
