//! The standard figures of a run (and of a comparison): which curves, axes and units.
//!
//! Axes show time in s, min or h (whichever suits the run's length), distances in µm and
//! amounts in particles or particles per m3; every axis names its unit.

use crate::error::{AnalysisError, Result};
use crate::metrics::{Profile, Reference, RunMetrics, SpeciesMetrics, SpeciesTime};
use crate::plot::{Line, LineChart, Slice};
use crate::runfile::{RunFile, SnapshotInfo};

/// A display unit of time.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TimeUnit {
    /// Symbol.
    pub name: &'static str,
    /// Seconds in one unit.
    pub seconds: f64,
}

/// s up to 10 min, min up to 3 h, h beyond.
pub fn time_unit(max_s: f64) -> TimeUnit {
    if max_s <= 600.0 {
        TimeUnit { name: "s", seconds: 1.0 }
    } else if max_s <= 3.0 * 3600.0 {
        TimeUnit { name: "min", seconds: 60.0 }
    } else {
        TimeUnit { name: "h", seconds: 3600.0 }
    }
}

/// Formats a time for a legend or title, e.g. "t = 1.5 h".
pub fn fmt_time(t_s: f64, u: TimeUnit) -> String {
    format!("t = {} {}", crate::plot::fmt_tick(t_s / u.seconds), u.name)
}

/// A figure with the file stem it is saved under.
#[derive(Debug, Clone, PartialEq)]
pub struct Figure {
    /// File stem (`time_course_<s>`...).
    pub name: String,
    /// The species it shows (`None`: the whole run).
    pub species: Option<String>,
    /// One-line caption.
    pub caption: String,
    /// The chart.
    pub chart: LineChart,
}

fn max_time(m: &RunMetrics) -> f64 {
    m.snapshots.last().map_or(0.0, |s| s.time_s)
}

/// Tumour and host dose over time (%ID/g), or amounts when no dose is recorded.
pub fn time_course(m: &RunMetrics, s: &SpeciesMetrics) -> Figure {
    let u = time_unit(max_time(m));
    let pts = |f: &dyn Fn(&SpeciesTime) -> Option<f64>| {
        s.times.iter().filter_map(|x| f(x).map(|v| (x.time_s / u.seconds, v))).collect::<Vec<_>>()
    };
    let (y_label, lines) = if s.dose_particles.is_some() {
        (
            "dose per gram (%ID/g)".to_string(),
            vec![
                Line { label: "tumour".into(), points: pts(&|x| x.tumour_percent_id_per_g), colour: 0 },
                Line { label: "host tissue".into(), points: pts(&|x| x.host_percent_id_per_g), colour: 1 },
            ],
        )
    } else {
        (
            "amount (particles)".to_string(),
            vec![
                Line { label: "tumour".into(), points: pts(&|x| Some(x.tumour.total())), colour: 0 },
                Line { label: "host tissue".into(), points: pts(&|x| Some(x.host.total())), colour: 1 },
            ],
        )
    };
    Figure {
        name: format!("time_course_{}", s.name),
        species: Some(s.name.clone()),
        caption: format!("{}: dose in the tumour and in host tissue over time", s.name),
        chart: LineChart {
            title: format!("{} in tumour and host", s.name),
            x_label: format!("time ({})", u.name),
            y_label,
            lines,
            log_x: false,
        },
    }
}

/// Free, cell-bound, internalised and matrix-bound particles in the tumour over time.
pub fn compartments(m: &RunMetrics, s: &SpeciesMetrics) -> Figure {
    let u = time_unit(max_time(m));
    let names = ["free", "bound to cells", "internalised", "bound to matrix"];
    let lines = (0..4)
        .filter_map(|c| {
            let pts: Vec<(f64, f64)> =
                s.times.iter().filter_map(|x| x.tumour.named()[c].1.map(|v| (x.time_s / u.seconds, v))).collect();
            (!pts.is_empty()).then(|| Line { label: names[c].into(), points: pts, colour: c })
        })
        .collect();
    Figure {
        name: format!("compartments_{}", s.name),
        species: Some(s.name.clone()),
        caption: format!("{}: where the particles in the tumour are", s.name),
        chart: LineChart {
            title: format!("{} in the tumour by compartment", s.name),
            x_label: format!("time ({})", u.name),
            y_label: "amount (particles)".into(),
            lines,
            log_x: false,
        },
    }
}

/// At most `n` indices from `0..len`, evenly spread, always with the last.
pub fn spread_indices(len: usize, n: usize) -> Vec<usize> {
    if len <= n {
        return (0..len).collect();
    }
    let mut v: Vec<usize> = (0..n).map(|k| ((k + 1) * len).div_ceil(n) - 1).collect();
    v.dedup();
    v
}

fn profile_of(x: &SpeciesTime, r: Reference) -> Option<&Profile> {
    match r {
        Reference::Vessel => x.vessel_profile.as_ref(),
        Reference::Surface => x.depth_profile.as_ref(),
    }
}

/// Mean concentration against distance, one line per snapshot (at most six).
pub fn profile_chart(m: &RunMetrics, s: &SpeciesMetrics, r: Reference) -> Option<Figure> {
    let u = time_unit(max_time(m));
    let idx: Vec<usize> = (0..s.times.len()).filter(|&i| profile_of(&s.times[i], r).is_some()).collect();
    if idx.is_empty() {
        return None;
    }
    let lines = spread_indices(idx.len(), 6)
        .into_iter()
        .enumerate()
        .map(|(c, k)| {
            let x = &s.times[idx[k]];
            let p = profile_of(x, r).expect("filtered above");
            Line {
                label: fmt_time(x.time_s, u),
                points: p
                    .bins
                    .iter()
                    .filter(|b| b.voxels > 0)
                    .map(|b| (0.5 * (b.lo_m + b.hi_m) * 1e6, b.mean_total))
                    .collect(),
                colour: c,
            }
        })
        .collect();
    Some(Figure {
        name: format!("profile_{}_{}", r.name(), s.name),
        species: Some(s.name.clone()),
        caption: format!("{}: mean concentration in the tumour against {}", s.name, r.label()),
        chart: LineChart {
            title: format!("{} penetration ({})", s.name, r.name()),
            x_label: format!("{} (µm)", r.label()),
            y_label: "mean concentration (m-3)".into(),
            lines,
            log_x: false,
        },
    })
}

/// Fraction of cancer cells above each threshold, one line per snapshot (at most six).
pub fn coverage_chart(m: &RunMetrics, s: &SpeciesMetrics) -> Option<Figure> {
    let u = time_unit(max_time(m));
    let idx: Vec<usize> = (0..s.times.len()).filter(|&i| s.times[i].coverage.is_some()).collect();
    if idx.is_empty() {
        return None;
    }
    let lines = spread_indices(idx.len(), 6)
        .into_iter()
        .enumerate()
        .map(|(c, k)| {
            let x = &s.times[idx[k]];
            let cov = x.coverage.as_ref().expect("filtered above");
            Line { label: fmt_time(x.time_s, u), points: cov.curve.clone(), colour: c }
        })
        .collect();
    Some(Figure {
        name: format!("coverage_{}", s.name),
        species: Some(s.name.clone()),
        caption: format!(
            "{}: fraction of cancer cells whose internalised particles exceed each threshold (threshold 0 is left off the logarithmic axis)",
            s.name
        ),
        chart: LineChart {
            title: format!("{} coverage of cancer cells", s.name),
            x_label: "threshold (internalised particles per cell)".into(),
            y_label: "fraction of cancer cells above (1)".into(),
            lines,
            log_x: true,
        },
    })
}

/// Particle stocks of the series (`plasma_<s>`, `cleared_<s>`...) over time.
pub fn balance_chart(m: &RunMetrics, s: &SpeciesMetrics) -> Option<Figure> {
    let u = time_unit(max_time(m));
    let stocks =
        ["injected", "plasma", "cleared", "free", "bound_cells", "bound_matrix", "internalised", "drained", "left"];
    let lines: Vec<Line> = stocks
        .iter()
        .enumerate()
        .filter_map(|(c, k)| {
            let se = m.series.iter().find(|x| x.name == format!("{k}_{}", s.name))?;
            Some(Line {
                label: k.replace('_', " "),
                points: m.snapshots.iter().zip(&se.values).map(|(sn, v)| (sn.time_s / u.seconds, *v)).collect(),
                colour: c,
            })
        })
        .collect();
    if lines.is_empty() {
        return None;
    }
    Some(Figure {
        name: format!("balance_{}", s.name),
        species: Some(s.name.clone()),
        caption: format!("{}: particle balance over the whole body, from the run's series", s.name),
        chart: LineChart {
            title: format!("{} particle balance", s.name),
            x_label: format!("time ({})", u.name),
            y_label: "amount (particles)".into(),
            lines,
            log_x: false,
        },
    })
}

/// The fluid-balance series, one chart per unit.
pub fn fluid_charts(m: &RunMetrics) -> Vec<Figure> {
    let u = time_unit(max_time(m));
    let mut units: Vec<String> = m.fluid_series().map(|s| s.units.clone()).collect();
    units.sort();
    units.dedup();
    units
        .iter()
        .enumerate()
        .map(|(i, unit)| {
            let lines = m
                .fluid_series()
                .filter(|s| &s.units == unit)
                .enumerate()
                .map(|(c, s)| Line {
                    label: s.name.trim_start_matches("fluid_").replace('_', " "),
                    points: m.snapshots.iter().zip(&s.values).map(|(sn, v)| (sn.time_s / u.seconds, *v)).collect(),
                    colour: c,
                })
                .collect();
            Figure {
                name: format!("fluid_{i}"),
                species: None,
                caption: format!("fluid balance series in {unit}"),
                chart: LineChart {
                    title: "fluid balance".into(),
                    x_label: format!("time ({})", u.name),
                    y_label: format!("value ({unit})"),
                    lines,
                    log_x: false,
                },
            }
        })
        .collect()
}

/// Every line figure of one run, species by species, then the fluid balance.
pub fn run_figures(m: &RunMetrics) -> Vec<Figure> {
    let mut out = Vec::new();
    for s in &m.species {
        out.push(time_course(m, s));
        let c = compartments(m, s);
        if !c.chart.lines.is_empty() {
            out.push(c);
        }
        out.extend(profile_chart(m, s, Reference::Vessel));
        out.extend(profile_chart(m, s, Reference::Surface));
        out.extend(coverage_chart(m, s));
        out.extend(balance_chart(m, s));
    }
    out.extend(fluid_charts(m));
    out
}

/// A lattice axis.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Axis {
    /// x.
    X,
    /// y.
    Y,
    /// z.
    Z,
}

impl std::str::FromStr for Axis {
    type Err = AnalysisError;
    fn from_str(s: &str) -> Result<Axis> {
        match s {
            "x" => Ok(Axis::X),
            "y" => Ok(Axis::Y),
            "z" => Ok(Axis::Z),
            _ => Err(AnalysisError::option("slice axis", s, "x, y or z")),
        }
    }
}

/// Reads a field, or `total_<s>`: every compartment of species `s` together, m-3 (the
/// compartment fields, and the cell table's bound and internalised loads where the snapshot
/// has no field for them, as in [`crate::metrics`]).
pub fn field_or_total(run: &RunFile, snap: &SnapshotInfo, name: &str) -> Result<(Vec<f64>, String)> {
    if let Some(s) = name.strip_prefix("total_")
        && run.field(snap, name)?.is_none()
    {
        let cells = run.table(snap, "cells")?;
        let mut sum: Option<Vec<f64>> = None;
        for p in ["free_", "bound_", "internalised_", "matrix_bound_"] {
            let col = format!("{p}{s}");
            let data = match run.field(snap, &col)? {
                Some(f) => Some(f.data),
                None if p != "free_" && p != "matrix_bound_" => {
                    cells.as_ref().and_then(|c| crate::metrics::cells_to_voxels(&run.lattice, c, &col))
                }
                None => None,
            };
            if let Some(data) = data {
                match &mut sum {
                    None => sum = Some(data),
                    Some(acc) => acc.iter_mut().zip(&data).for_each(|(a, b)| *a += b),
                }
            }
        }
        if let Some(sum) = sum {
            return Ok((sum, "m-3".into()));
        }
    }
    let f = run.require_field(snap, name)?;
    Ok((f.data, f.units))
}

/// A plane of a field through the lattice, normal to `axis`, at `index` (default: the middle).
pub fn slice(run: &RunFile, snap: &SnapshotInfo, field: &str, axis: Axis, index: Option<usize>) -> Result<Slice> {
    let l = &run.lattice;
    let [nx, ny, nz] = l.shape_xyz;
    let (a, n) = match axis {
        Axis::X => (0, nx),
        Axis::Y => (1, ny),
        Axis::Z => (2, nz),
    };
    let k = index.unwrap_or(n / 2);
    if k >= n {
        return Err(AnalysisError::option("slice index", k, &format!("an index from 0 to {} along {axis:?}", n - 1)));
    }
    let (data, units) = field_or_total(run, snap, field)?;
    let (ua, va) = match a {
        0 => (1, 2),
        1 => (0, 2),
        _ => (0, 1),
    };
    let (nu, nv) = (l.shape_xyz[ua], l.shape_xyz[va]);
    let mut values = Vec::with_capacity(nu * nv);
    for v in 0..nv {
        for u in 0..nu {
            let mut ijk = [0; 3];
            ijk[a] = k;
            ijk[ua] = u;
            ijk[va] = v;
            values.push(data[l.index(ijk)]);
        }
    }
    let names = ["x", "y", "z"];
    let pos = l.origin_m[a] + (k as f64 + 0.5) * l.voxel_size_m;
    let u = time_unit(run.snapshots.last().map_or(0.0, |s| s.time_s));
    Ok(Slice {
        title: format!("{field}, {}, {} = {} µm", fmt_time(snap.time_s, u), names[a], crate::plot::fmt_tick(pos * 1e6)),
        value_label: format!("{field} ({units})"),
        nu,
        nv,
        values,
        corner_m: (l.origin_m[ua], l.origin_m[va]),
        cell_m: l.voxel_size_m,
        u_name: names[ua].into(),
        v_name: names[va].into(),
    })
}

/// Fields worth a slice in a report: region, porosity, pressure, oxygen, vessel surface, and the
/// total of each species (those the snapshot holds).
pub fn default_slice_fields(run: &RunFile, snap: &SnapshotInfo, species: &[String]) -> Result<Vec<String>> {
    let have = run.field_names(snap)?;
    let mut out: Vec<String> = ["region", "porosity", "pressure", "oxygen", "vessel_surface"]
        .iter()
        .filter(|f| have.iter().any(|h| h == *f))
        .map(|f| f.to_string())
        .collect();
    for s in species {
        if ["free_", "bound_", "internalised_", "matrix_bound_"].iter().any(|p| have.contains(&format!("{p}{s}"))) {
            out.push(format!("total_{s}"));
        }
    }
    Ok(out)
}

/// Unique display names of runs: the run name, with the file stem or a number added to repeats.
pub fn run_labels(runs: &[&RunMetrics]) -> Vec<String> {
    let mut out: Vec<String> = runs.iter().map(|m| m.run.clone()).collect();
    for i in 0..out.len() {
        if out.iter().filter(|n| **n == out[i]).count() > 1 {
            let stem = runs[i].path.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_default();
            let dup: Vec<usize> = (0..out.len()).filter(|&j| out[j] == out[i]).collect();
            for (n, j) in dup.into_iter().enumerate() {
                out[j] = format!("{} ({}, #{})", runs[j].run, stem, n + 1);
            }
        }
    }
    out
}

/// Comparison figures: the same curves of several runs overlaid, per species present in any.
pub fn compare_figures(runs: &[&RunMetrics]) -> Vec<Figure> {
    let labels = run_labels(runs);
    let tmax = runs.iter().map(|m| max_time(m)).fold(0.0, f64::max);
    let u = time_unit(tmax);
    let mut species: Vec<String> = Vec::new();
    for m in runs {
        for s in &m.species {
            if !species.contains(&s.name) {
                species.push(s.name.clone());
            }
        }
    }
    let mut out = Vec::new();
    for sp in &species {
        let per_run = |f: &dyn Fn(&SpeciesMetrics) -> Vec<(f64, f64)>| -> Vec<Line> {
            runs.iter()
                .zip(&labels)
                .enumerate()
                .filter_map(|(c, (m, l))| m.species(sp).map(|s| Line { label: l.clone(), points: f(s), colour: c }))
                .filter(|l| !l.points.is_empty())
                .collect()
        };
        let tc = per_run(&|s| {
            s.times.iter().filter_map(|x| x.tumour_percent_id_per_g.map(|v| (x.time_s / u.seconds, v))).collect()
        });
        if !tc.is_empty() {
            out.push(Figure {
                name: format!("compare_time_course_{sp}"),
                species: Some(sp.clone()),
                caption: format!("{sp}: tumour dose over time in each run"),
                chart: LineChart {
                    title: format!("{sp} in the tumour"),
                    x_label: format!("time ({})", u.name),
                    y_label: "tumour dose per gram (%ID/g)".into(),
                    lines: tc,
                    log_x: false,
                },
            });
        }
        let fi = per_run(&|s| {
            s.times
                .iter()
                .filter_map(|x| {
                    let t = x.tumour.total();
                    x.tumour.internalised.map(|v| (x.time_s / u.seconds, v / t)).filter(|p| p.1.is_finite())
                })
                .collect()
        });
        if !fi.is_empty() {
            out.push(Figure {
                name: format!("compare_internalised_{sp}"),
                species: Some(sp.clone()),
                caption: format!("{sp}: share of the tumour's particles that cells have internalised"),
                chart: LineChart {
                    title: format!("{sp} internalised share"),
                    x_label: format!("time ({})", u.name),
                    y_label: "internalised / tumour total (1)".into(),
                    lines: fi,
                    log_x: false,
                },
            });
        }
        let cov =
            per_run(&|s| s.times.last().and_then(|x| x.coverage.as_ref()).map(|c| c.curve.clone()).unwrap_or_default());
        if !cov.is_empty() {
            out.push(Figure {
                name: format!("compare_coverage_{sp}"),
                species: Some(sp.clone()),
                caption: format!("{sp}: coverage of cancer cells at each run's last snapshot"),
                chart: LineChart {
                    title: format!("{sp} coverage (last snapshot)"),
                    x_label: "threshold (internalised particles per cell)".into(),
                    y_label: "fraction of cancer cells above (1)".into(),
                    lines: cov,
                    log_x: true,
                },
            });
        }
        for r in [Reference::Vessel, Reference::Surface] {
            let pr = per_run(&|s| {
                s.times
                    .last()
                    .and_then(|x| profile_of(x, r))
                    .map(|p| {
                        p.bins
                            .iter()
                            .filter(|b| b.voxels > 0)
                            .map(|b| (0.5 * (b.lo_m + b.hi_m) * 1e6, b.mean_total))
                            .collect()
                    })
                    .unwrap_or_default()
            });
            if !pr.is_empty() {
                out.push(Figure {
                    name: format!("compare_profile_{}_{sp}", r.name()),
                    species: Some(sp.clone()),
                    caption: format!("{sp}: mean concentration against {} at each run's last snapshot", r.label()),
                    chart: LineChart {
                        title: format!("{sp} penetration ({}, last snapshot)", r.name()),
                        x_label: format!("{} (µm)", r.label()),
                        y_label: "mean concentration (m-3)".into(),
                        lines: pr,
                        log_x: false,
                    },
                });
            }
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    // Known answers by hand.
    #[test]
    fn spread_indices_keep_the_last() {
        assert_eq!(spread_indices(3, 6), vec![0, 1, 2]);
        assert_eq!(spread_indices(12, 6), vec![1, 3, 5, 7, 9, 11]);
        assert_eq!(spread_indices(7, 3), vec![2, 4, 6]);
        assert_eq!(time_unit(7200.0).name, "min");
        assert_eq!(time_unit(86400.0).name, "h");
    }
}
