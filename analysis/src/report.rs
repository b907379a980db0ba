//! Self-contained HTML pages: the report of one run and the comparison of several.
//!
//! A page loads nothing from outside: styles are inline, line charts are inline SVG and field
//! slices are PNG images in `data:` URIs, so it opens offline in any browser and can be mailed
//! as one file. Every page carries the caution about research use ([`crate::CAUTION`]).

use std::fmt::Write as _;

use base64::Engine as _;

use crate::error::Result;
use crate::figures::{self, Axis, Figure, time_unit};
use crate::metrics::RunMetrics;
use crate::plot;
use crate::runfile::RunFile;
use crate::tables::{Row, species_time_rows, summary_rows};

/// Escapes text for HTML.
pub fn esc(s: &str) -> String {
    let mut o = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => o.push_str("&amp;"),
            '<' => o.push_str("&lt;"),
            '>' => o.push_str("&gt;"),
            '"' => o.push_str("&quot;"),
            '\'' => o.push_str("&#39;"),
            c => o.push(c),
        }
    }
    o
}

const STYLE: &str = "body{font-family:'DejaVu Sans',Verdana,Arial,sans-serif;margin:0;background:#fafafa;color:#1a1a1a}\
main{max-width:1100px;margin:auto;padding:1em 2em;background:#fff}\
h1{font-size:1.6em}h2{border-bottom:2px solid #0072b2;padding-bottom:.2em;margin-top:1.6em}\
.caution{border:2px solid #d55e00;background:#fff4ec;padding:.6em 1em;margin:1em 0;font-weight:bold}\
table{border-collapse:collapse;margin:.6em 0;font-size:.92em}th,td{border:1px solid #ccc;padding:.25em .6em;text-align:left}\
th{background:#eef4f8}td.n{text-align:right;font-variant-numeric:tabular-nums}\
figure{margin:1em 0;display:inline-block;vertical-align:top}figcaption{font-size:.9em;color:#444;max-width:800px}\
svg,img{max-width:100%;height:auto}pre{background:#f4f4f4;padding:.6em;overflow-x:auto;font-size:.85em}\
.notes li{margin:.2em 0}.meta td:first-child{font-weight:bold}";

/// Records, on `<body>`, whether every image decoded (`data-images-ok`) and how many errors the
/// page raised (`data-errors`): what a headless browser test reads back. It loads nothing.
const CHECK_SCRIPT: &str = "<script>(function(){var errs=0;\
window.addEventListener('error',function(){errs++;},true);\
window.addEventListener('load',function(){var bad=0;\
for(var i=0;i<document.images.length;i++){var m=document.images[i];if(!(m.complete&&m.naturalWidth>0))bad++;}\
document.body.setAttribute('data-images-ok',bad===0?'yes':'no:'+bad);\
document.body.setAttribute('data-errors',String(errs));});})();</script>";

fn page(title: &str, body: &str) -> String {
    format!(
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>{t}</title>\
<meta name=\"viewport\" content=\"width=device-width,initial-scale=1\"><style>{STYLE}</style>{CHECK_SCRIPT}</head>\n\
<body><main>\n{body}\n<p class=\"caution\">{c}</p>\n</main></body></html>\n",
        t = esc(title),
        c = esc(crate::CAUTION)
    )
}

/// Formats a value for a table: four significant digits.
pub fn fmt_value(v: f64) -> String {
    if !v.is_finite() {
        return "n/a".into();
    }
    if v == 0.0 {
        return "0".into();
    }
    let a = v.abs();
    if (1e-3..1e5).contains(&a) {
        let digits = (3 - a.log10().floor() as i32).max(0) as usize;
        let s = format!("{v:.digits$}");
        if s.contains('.') { s.trim_end_matches('0').trim_end_matches('.').to_string() } else { s }
    } else {
        format!("{v:.3e}")
    }
}

/// A row converted for display: lengths in µm, times in the run's unit.
fn display(r: &Row, tu: figures::TimeUnit) -> (f64, String) {
    match r.units.as_str() {
        "m" => (r.value * 1e6, "µm".into()),
        "s" => (r.value / tu.seconds, tu.name.into()),
        "percent g-1 s" => (r.value / tu.seconds, format!("%ID/g × {}", tu.name)),
        "percent" => (r.value, "%ID".into()),
        "percent g-1" => (r.value, "%ID/g".into()),
        u => (r.value, u.to_string()),
    }
}

/// Human labels of the quantities in the tables.
pub fn label(q: &str) -> String {
    let fixed = [
        ("dose_injected", "injected dose"),
        ("auc_tumour_percent_id_per_g", "AUC of tumour %ID/g"),
        ("auc_tumour_total", "AUC of tumour amount"),
        ("peak_tumour_percent_id_per_g", "peak tumour %ID/g"),
        ("time_to_peak", "time to peak"),
        ("peak_tumour_percent_id", "peak tumour %ID"),
        ("tumour_total", "tumour amount"),
        ("host_total", "host amount"),
        ("tumour_percent_id", "tumour dose (%ID)"),
        ("tumour_percent_id_per_g", "tumour dose per gram"),
        ("host_percent_id", "host dose (%ID)"),
        ("host_percent_id_per_g", "host dose per gram"),
        ("tumour_to_host_ratio", "tumour-to-host concentration ratio"),
        ("coverage_threshold", "coverage threshold (internalised per cell)"),
        ("coverage_fraction", "coverage: cancer cells above threshold"),
        ("cancer_cells", "cancer cells"),
        ("mean_internalised_per_cancer_cell", "mean internalised per cancer cell"),
        ("cv_internalised", "coefficient of variation, internalised"),
        ("gini_internalised", "Gini coefficient, internalised"),
        ("cv_cell_associated", "coefficient of variation, bound + internalised"),
        ("gini_cell_associated", "Gini coefficient, bound + internalised"),
        ("vessel_mean_distance", "mean distance from perfused vessels (amount-weighted)"),
        ("vessel_d50", "distance from vessels holding 50 % of the amount"),
        ("vessel_d90", "distance from vessels holding 90 % of the amount"),
        ("vessel_index_total", "perivascular index, all particles"),
        ("vessel_index_free", "perivascular index, free particles"),
        ("bsb_index_vessel", "binding-site-barrier index (bound, vs vessels)"),
        ("surface_mean_distance", "mean depth below tumour surface (amount-weighted)"),
        ("surface_d50", "depth holding 50 % of the amount"),
        ("surface_d90", "depth holding 90 % of the amount"),
        ("surface_index_total", "surface index, all particles"),
        ("surface_index_free", "surface index, free particles"),
        ("bsb_index_surface", "binding-site-barrier index (bound, vs surface)"),
        ("balance_injected", "balance: injected"),
        ("balance_accounted", "balance: accounted for"),
        ("balance_residual", "balance: residual"),
        ("balance_relative_residual", "balance: relative residual"),
    ];
    if let Some((_, l)) = fixed.iter().find(|(k, _)| *k == q) {
        return l.to_string();
    }
    q.replace('_', " ")
}

fn svg_figure(out: &mut String, f: &Figure) -> Result<()> {
    let svg = plot::line_svg(&f.chart, plot::SIZE)?;
    let _ = writeln!(out, "<figure>{svg}<figcaption>{}</figcaption></figure>", esc(&f.caption));
    Ok(())
}

fn png_img(bytes: &[u8], alt: &str) -> String {
    format!(
        "<img alt=\"{}\" src=\"data:image/png;base64,{}\">",
        esc(alt),
        base64::engine::general_purpose::STANDARD.encode(bytes)
    )
}

fn metric_table(out: &mut String, rows: &[Row], tu: figures::TimeUnit) {
    out.push_str("<table><tr><th>quantity</th><th>value</th><th>units</th></tr>\n");
    for r in rows {
        let (v, u) = display(r, tu);
        let _ = writeln!(
            out,
            "<tr><td>{}</td><td class=\"n\">{}</td><td>{}</td></tr>",
            esc(&label(&r.quantity)),
            fmt_value(v),
            esc(&u)
        );
    }
    out.push_str("</table>\n");
}

fn notes(out: &mut String, notes: &[String]) {
    if notes.is_empty() {
        return;
    }
    out.push_str("<ul class=\"notes\">\n");
    for n in notes {
        let _ = writeln!(out, "<li>{}</li>", esc(n));
    }
    out.push_str("</ul>\n");
}

const DEFINITIONS: &str = "<details><summary>Definitions</summary><ul>\
<li><b>%ID</b>: percent of the injected dose; <b>%ID/g</b>: per gram of tissue, the mass being volume times the \
tissue density given (1 g/mL by default, common practice).</li>\
<li><b>AUC</b>: trapezoidal area under tumour %ID/g over the analysed snapshots.</li>\
<li><b>Tumour-to-host ratio</b>: mean concentration in the tumour over that in host tissue.</li>\
<li><b>Distances</b>: from each tumour voxel centre to the nearest perfused vessel wall (centre-line distance \
minus radius, found with a k-d tree over centre-line samples), and depth below the tumour surface (distance to \
the nearest face between tumour and host voxels). d50 and d90: distances within which 50 % and 90 % of the \
tumour's particles lie.</li>\
<li><b>Perivascular index</b> I = 1 − (amount-weighted mean distance) / (mean distance of tumour voxels): 0 spread \
like the tissue, 1 all at the vessel wall, negative concentrated far from vessels. The <b>binding-site-barrier \
index</b> is this index for the cell-bound particles: the barrier of Fujimori et al. (1990), J Nucl Med 31:1191, \
where binding holds high-affinity carriers near the vessels they leave. Compare it with the index of free particles.</li>\
<li><b>Coverage</b>: fraction of cancer cells whose internalised particles exceed the threshold; the curve repeats \
it over thresholds.</li>\
<li><b>Coefficient of variation</b>: population standard deviation over mean across cancer cells; <b>Gini \
coefficient</b> (Gini 1912): 0 when every cell holds the same, near 1 when one cell holds all.</li>\
<li><b>Balance residual</b>: injected particles minus the stocks the run records.</li></ul></details>\n";

/// The report of one run, as HTML text.
pub fn run_report(m: &RunMetrics, run: &RunFile) -> Result<String> {
    let mut b = String::new();
    let tu = time_unit(m.snapshots.last().map_or(0.0, |s| s.time_s));
    let _ = writeln!(b, "<h1>interstice run report: {}</h1>", esc(&m.run));
    let _ = writeln!(b, "<p class=\"caution\">{}</p>", esc(crate::CAUTION));
    b.push_str("<h2>Run</h2>\n<table class=\"meta\">\n");
    let last = m.snapshots.last();
    let [nx, ny, nz] = m.lattice.shape_xyz;
    let h_um = m.lattice.voxel_size_m * 1e6;
    let rows = [
        ("run file", m.path.display().to_string()),
        ("status", m.status.clone()),
        (
            "snapshots analysed",
            format!("{} of {} groups (finished_snapshots = {})", m.snapshots.len(), m.snapshot_groups, m.finished_attr),
        ),
        ("last analysed time", last.map_or("none".into(), |s| figures::fmt_time(s.time_s, tu))),
        ("lattice", format!("{nx} × {ny} × {nz} voxels of {} µm", fmt_value(h_um))),
        (
            "tumour volume (last snapshot)",
            format!("{} mm3", fmt_value(m.tumour_volume_m3.last().copied().unwrap_or(0.0) * 1e9)),
        ),
        (
            "species",
            if m.species.is_empty() {
                "none".into()
            } else {
                m.species.iter().map(|s| s.name.as_str()).collect::<Vec<_>>().join(", ")
            },
        ),
        ("tissue density", format!("{} g/mL", fmt_value(m.options.density_kg_per_m3 / 1000.0))),
        (
            "coverage threshold",
            format!("{} internalised particles per cancer cell", fmt_value(m.options.threshold_particles)),
        ),
        (
            "profile bin width",
            format!("{} µm", fmt_value(m.options.bin_width_m.unwrap_or(m.lattice.voxel_size_m) * 1e6)),
        ),
    ];
    for (k, v) in rows {
        let _ = writeln!(b, "<tr><td>{}</td><td>{}</td></tr>", esc(k), esc(&v));
    }
    b.push_str("</table>\n");
    if !m.notes.is_empty() {
        b.push_str("<h2>Skipped or partial</h2>\n");
        notes(&mut b, &m.notes);
    }

    for s in &m.species {
        let _ = writeln!(b, "<h2>Species {}</h2>", esc(&s.name));
        let _ = writeln!(
            b,
            "<p>Injected dose: {} particles ({}).</p>",
            s.dose_particles.map_or("not recorded".into(), fmt_value),
            esc(&s.dose_source)
        );
        let mut rows = summary_rows(m).into_iter().filter(|r| r.species == s.name).collect::<Vec<_>>();
        if let Some(x) = s.times.last() {
            let _ = writeln!(
                b,
                "<p>Values at the last analysed snapshot ({}) and over the time course:</p>",
                figures::fmt_time(x.time_s, tu)
            );
            rows.extend(species_time_rows(&s.name, x));
        }
        metric_table(&mut b, &rows, tu);
        for f in figures::run_figures(m).iter().filter(|f| f.species.as_deref() == Some(s.name.as_str())) {
            svg_figure(&mut b, f)?;
        }
    }
    let fluid = figures::fluid_charts(m);
    if !fluid.is_empty() {
        b.push_str("<h2>Fluid balance</h2>\n");
        for f in &fluid {
            svg_figure(&mut b, f)?;
        }
    }

    if let Some(snap) = last {
        let species: Vec<String> = m.species.iter().map(|s| s.name.clone()).collect();
        let fields = figures::default_slice_fields(run, snap, &species)?;
        if !fields.is_empty() {
            let _ = writeln!(
                b,
                "<h2>Field slices</h2>\n<p>Mid-plane slices normal to z at the last analysed snapshot, coloured with cividis \
(Nuñez et al. 2018, PLoS ONE 13:e0199239), readable with colour-vision deficiency.</p>"
            );
            for f in fields {
                let sl = figures::slice(run, snap, &f, Axis::Z, None)?;
                let png = plot::slice_png(&sl, (760, 560))?;
                let _ = writeln!(
                    b,
                    "<figure>{}<figcaption>{}</figcaption></figure>",
                    png_img(&png, &sl.title),
                    esc(&sl.title)
                );
            }
        }
    }

    if !m.series.is_empty() {
        b.push_str("<h2>Time series recorded by the run</h2>\n<table><tr><th>series</th><th>units</th><th>first</th><th>last</th></tr>\n");
        for s in &m.series {
            let _ = writeln!(
                b,
                "<tr><td>{}</td><td>{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td></tr>",
                esc(&s.name),
                esc(&s.units),
                s.values.first().map_or("n/a".into(), |v| fmt_value(*v)),
                s.values.last().map_or("n/a".into(), |v| fmt_value(*v))
            );
        }
        b.push_str("</table>\n");
    }

    b.push_str(DEFINITIONS);
    b.push_str("<h2>Provenance</h2>\n<table class=\"meta\">\n");
    for (k, v) in &m.provenance {
        let _ = writeln!(b, "<tr><td>{}</td><td>{}</td></tr>", esc(k), esc(v));
    }
    b.push_str("</table>\n");
    if let Some(c) = &m.file_caution {
        let _ = writeln!(b, "<p>Caution stored in the run file: {}</p>", esc(c));
    }
    for (title, text) in
        [("Scenario as written", &m.scenario_toml), ("Resolved scenario (every key)", &m.resolved_toml)]
    {
        if let Some(t) = text {
            let _ = writeln!(b, "<h2>{title}</h2>\n<details><summary>show</summary><pre>{}</pre></details>", esc(t));
        }
    }
    Ok(page(&format!("interstice report: {}", m.run), &b))
}

/// The comparison page of several runs, as HTML text.
pub fn compare_report(runs: &[&RunMetrics]) -> Result<String> {
    let labels = figures::run_labels(runs);
    let tmax = runs.iter().filter_map(|m| m.snapshots.last()).map(|s| s.time_s).fold(0.0, f64::max);
    let tu = time_unit(tmax);
    let mut b = String::new();
    let _ = writeln!(b, "<h1>interstice comparison of {} runs</h1>", runs.len());
    let _ = writeln!(b, "<p class=\"caution\">{}</p>", esc(crate::CAUTION));
    b.push_str("<h2>Runs</h2>\n<table><tr><th>run</th><th>file</th><th>status</th><th>snapshots</th><th>last time</th><th>tumour volume (mm3)</th><th>species</th></tr>\n");
    for (m, l) in runs.iter().zip(&labels) {
        let _ = writeln!(
            b,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td class=\"n\">{}</td><td>{}</td><td class=\"n\">{}</td><td>{}</td></tr>",
            esc(l),
            esc(&m.path.display().to_string()),
            esc(&m.status),
            m.snapshots.len(),
            m.snapshots.last().map_or("none".into(), |s| figures::fmt_time(s.time_s, tu)),
            fmt_value(m.tumour_volume_m3.last().copied().unwrap_or(0.0) * 1e9),
            esc(&m.species.iter().map(|s| s.name.as_str()).collect::<Vec<_>>().join(", "))
        );
    }
    b.push_str("</table>\n");

    let mut species: Vec<String> = Vec::new();
    for m in runs {
        for s in &m.species {
            if !species.contains(&s.name) {
                species.push(s.name.clone());
            }
        }
    }
    let figs = figures::compare_figures(runs);
    for sp in &species {
        let _ = writeln!(b, "<h2>Species {}</h2>", esc(sp));
        b.push_str("<p>Summary over each run's time course and values at each run's last analysed snapshot.</p>\n");
        // Quantities in the order they first appear across runs.
        let per_run: Vec<Vec<Row>> = runs
            .iter()
            .map(|m| {
                let mut rows: Vec<Row> = summary_rows(m).into_iter().filter(|r| &r.species == sp).collect();
                if let Some(x) = m.species(sp).and_then(|s| s.times.last()) {
                    rows.extend(species_time_rows(sp, x));
                }
                rows
            })
            .collect();
        let mut order: Vec<(String, String)> = Vec::new();
        for rows in &per_run {
            for r in rows {
                let (_, u) = display(r, tu);
                if !order.iter().any(|(q, _)| q == &r.quantity) {
                    order.push((r.quantity.clone(), u));
                }
            }
        }
        b.push_str("<table><tr><th>quantity</th><th>units</th>");
        for l in &labels {
            let _ = write!(b, "<th>{}</th>", esc(l));
        }
        b.push_str("</tr>\n");
        for (q, u) in &order {
            let _ = write!(b, "<tr><td>{}</td><td>{}</td>", esc(&label(q)), esc(u));
            for rows in &per_run {
                let cell = rows.iter().find(|r| &r.quantity == q).map_or("—".into(), |r| fmt_value(display(r, tu).0));
                let _ = write!(b, "<td class=\"n\">{cell}</td>");
            }
            b.push_str("</tr>\n");
        }
        b.push_str("</table>\n");
        for f in figs.iter().filter(|f| f.species.as_deref() == Some(sp.as_str())) {
            svg_figure(&mut b, f)?;
        }
    }
    if species.is_empty() {
        b.push_str("<p>None of the runs has a particle species: there are no delivery metrics to compare.</p>\n");
    }
    let any_notes = runs.iter().any(|m| !m.notes.is_empty());
    if any_notes {
        b.push_str("<h2>Skipped or partial</h2>\n");
        for (m, l) in runs.iter().zip(&labels) {
            if !m.notes.is_empty() {
                let _ = writeln!(b, "<h3>{}</h3>", esc(l));
                notes(&mut b, &m.notes);
            }
        }
    }
    b.push_str(DEFINITIONS);
    Ok(page("interstice comparison", &b))
}
