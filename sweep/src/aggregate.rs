//! Aggregation: one table of every run's parameters and delivery metrics (CSV and HDF5), and
//! the sensitivity indices of the chosen outputs.
//!
//! Files in `<folder>/aggregate/`:
//!
//! | file | content |
//! |---|---|
//! | `table.csv` | one row per run: `run`, `state`, `seed`, one column per swept key, then the metrics |
//! | `columns.csv` | `column, kind, units, description` of every column of the table |
//! | `table.h5` | the same table: `/table/<column>` (numbers as float64 with NaN for NA, text as UTF-8), attributes `units`, `kind`; root attribute `columns` in table order; `/sensitivity/<column>` |
//! | `sensitivity.csv` | `output, method, index, parameter, parameter2, value, conf, samples` (Morris and Saltelli designs) |
//!
//! Metric columns come from the analysis crate's tidy rows, chosen by name: `<quantity>` for a
//! quantity of the whole run, `<species>:<quantity>` for a species; quantities over time are
//! taken at the last finished snapshot. A run without a metric, or not finished, has `NA`.
//! The table holds nothing that depends on where or how fast a run was executed (wall times
//! and hosts are in `runs.csv`), so a sweep run locally and on Slurm give the same table.

use std::path::{Path, PathBuf};
use std::str::FromStr;

use hdf5::types::VarLenUnicode;
use interstice_analysis::cli::AnalysisArgs;
use interstice_analysis::tables::{metric_rows, num, species_time_rows, summary_rows, text};

use crate::error::{Result, SweepError};
use crate::folder::{Folder, RunState, read_status, write_atomic};
use crate::sensitivity;
use crate::spec::Design;

/// A CSV cell of a TOML value: numbers in their shortest exact form, text quoted when needed.
pub fn cell(v: &toml::Value) -> String {
    match v {
        toml::Value::Float(x) => num(*x),
        toml::Value::Integer(i) => i.to_string(),
        toml::Value::String(s) => text(s),
        toml::Value::Boolean(b) => b.to_string(),
        other => text(&other.to_string()),
    }
}

/// One column of the table.
#[derive(Debug, Clone, PartialEq)]
pub struct Column {
    pub name: String,
    /// "index", "state", "seed", "parameter" or "metric".
    pub kind: &'static str,
    pub units: String,
    pub description: String,
    pub values: Values,
}

/// The values of a column.
#[derive(Debug, Clone, PartialEq)]
pub enum Values {
    Number(Vec<f64>),
    Text(Vec<String>),
}

/// One row of `sensitivity.csv`.
#[derive(Debug, Clone, PartialEq)]
pub struct SensitivityRow {
    pub output: String,
    /// "morris" or "sobol".
    pub method: &'static str,
    /// mu, mu_star, sigma (Morris); S1, ST, S2 (Sobol).
    pub index: &'static str,
    pub parameter: String,
    /// The second factor of S2, empty otherwise.
    pub parameter2: String,
    pub value: f64,
    /// Half-width of the confidence interval (NaN where there is none).
    pub conf: f64,
    /// Trajectories (Morris) or base rows (Sobol) used.
    pub samples: usize,
}

/// The aggregate of a sweep.
#[derive(Debug, Clone)]
pub struct Aggregate {
    pub columns: Vec<Column>,
    pub sensitivity: Vec<SensitivityRow>,
    /// What was skipped and why.
    pub notes: Vec<String>,
    /// Runs per state.
    pub states: Vec<String>,
}

fn units_of_key(key: &str) -> String {
    // The unit is the end of the key name (`_um`, `_per_M_s`...); a bare name is dimensionless.
    let last = key.rsplit('.').next().unwrap_or(key);
    let last = last.split('[').next().unwrap_or(last);
    format!("as in the key name ({last})")
}

/// Reads every run and builds the table and the sensitivity indices.
pub fn aggregate(folder: &Folder, args: &AnalysisArgs) -> Result<Aggregate> {
    let plan = &folder.plan;
    let n = folder.len();
    let mut notes = Vec::new();
    let mut states = Vec::with_capacity(n);
    // Metric values per run, in the order quantities first appear.
    let mut names: Vec<(String, String, String)> = Vec::new(); // (column, units, description)
    let mut index: std::collections::HashMap<String, usize> = std::collections::HashMap::new();
    let mut per_run: Vec<Vec<(usize, f64)>> = vec![Vec::new(); n];
    let mut add = |names: &mut Vec<(String, String, String)>, col: String, units: &str, desc: String| -> usize {
        *index.entry(col.clone()).or_insert_with(|| {
            names.push((col, units.to_string(), desc));
            names.len() - 1
        })
    };
    let mut unfinished = 0;
    for (i, row) in per_run.iter_mut().enumerate() {
        let st = folder.state(i, &|_| None);
        states.push(st.word().to_string());
        if st != RunState::Finished {
            unfinished += 1;
            continue;
        }
        let (_, m) = interstice_analysis::cli::load(&folder.run_file(i), args)
            .map_err(|source| SweepError::Metrics { index: i, source })?;
        let last_t = m.snapshots.last().map(|s| s.time_s);
        if let Some(t) = last_t {
            let c = add(&mut names, "final_time".into(), "s", "time of the last finished snapshot".into());
            row.push((c, t));
        }
        for r in metric_rows(&m).into_iter().filter(|r| r.species.is_empty() && r.time_s == last_t) {
            let c = add(&mut names, r.quantity.clone(), &r.units, format!("{} at the last snapshot", r.quantity));
            row.push((c, r.value));
        }
        for r in summary_rows(&m) {
            let c = add(
                &mut names,
                format!("{}:{}", r.species, r.quantity),
                &r.units,
                format!("{} of species {}", r.quantity, r.species),
            );
            row.push((c, r.value));
        }
        for sp in &m.species {
            if let Some(x) = sp.times.last() {
                for r in species_time_rows(&sp.name, x) {
                    let c = add(
                        &mut names,
                        format!("{}:{}", r.species, r.quantity),
                        &r.units,
                        format!("{} of species {} at the last snapshot", r.quantity, r.species),
                    );
                    row.push((c, r.value));
                }
            }
        }
    }
    if unfinished > 0 {
        notes.push(format!("{unfinished} of {n} runs are not finished: their metrics are NA"));
    }
    let mut columns = vec![
        Column {
            name: "run".into(),
            kind: "index",
            units: "1".into(),
            description: "run index".into(),
            values: Values::Number((0..n).map(|i| i as f64).collect()),
        },
        Column {
            name: "state".into(),
            kind: "state",
            units: String::new(),
            description: "pending, running, finished, failed or interrupted".into(),
            values: Values::Text(states.clone()),
        },
        Column {
            name: "seed".into(),
            kind: "seed",
            units: "1".into(),
            description: "the run's seed (run.seed)".into(),
            values: Values::Text(plan.runs.iter().map(|r| r.seed.to_string()).collect()),
        },
    ];
    for (k, key) in plan.columns().iter().enumerate() {
        let numeric = plan.runs.iter().all(|r| r.values[k].is_float() || r.values[k].is_integer());
        let values = if numeric {
            Values::Number((0..n).map(|i| plan.numeric(i, k)).collect())
        } else {
            Values::Text(
                plan.runs
                    .iter()
                    .map(|r| match &r.values[k] {
                        toml::Value::String(s) => s.clone(),
                        v => v.to_string(),
                    })
                    .collect(),
            )
        };
        columns.push(Column {
            name: key.clone(),
            kind: "parameter",
            units: units_of_key(key),
            description: format!("scenario key {key}"),
            values,
        });
    }
    for (c, (name, units, desc)) in names.iter().enumerate() {
        let mut v = vec![f64::NAN; n];
        for (i, row) in per_run.iter().enumerate() {
            if let Some(&(_, x)) = row.iter().find(|(cc, _)| *cc == c) {
                v[i] = x;
            }
        }
        columns.push(Column {
            name: name.clone(),
            kind: "metric",
            units: units.clone(),
            description: desc.clone(),
            values: Values::Number(v),
        });
    }
    let sensitivity = sensitivity_rows(folder, &columns, &mut notes)?;
    Ok(Aggregate { columns, sensitivity, notes, states })
}

/// The output columns named by the sweep's `outputs` (with `*:quantity` for every species).
pub fn output_columns(outputs: &[String], columns: &[Column], given: bool) -> Result<Vec<String>> {
    let metrics: Vec<&str> = columns.iter().filter(|c| c.kind == "metric").map(|c| c.name.as_str()).collect();
    let mut out = Vec::new();
    for o in outputs {
        let matched: Vec<&str> = match o.strip_prefix("*:") {
            Some(q) => metrics.iter().copied().filter(|m| m.split_once(':').is_some_and(|(_, mq)| mq == q)).collect(),
            None => metrics.iter().copied().filter(|m| *m == o).collect(),
        };
        if matched.is_empty() && given {
            return Err(SweepError::Incomplete {
                what: format!(
                    "sensitivity output `{o}` is not a metric column of the table; metric columns: {}",
                    if metrics.is_empty() { "none (no run finished?)".to_string() } else { metrics.join(", ") }
                ),
            });
        }
        for m in matched {
            if !out.iter().any(|x: &String| x == m) {
                out.push(m.to_string());
            }
        }
    }
    Ok(out)
}

fn sensitivity_rows(folder: &Folder, columns: &[Column], notes: &mut Vec<String>) -> Result<Vec<SensitivityRow>> {
    let spec = &folder.plan.spec;
    if !matches!(spec.design, Design::Morris | Design::Saltelli) {
        return Ok(Vec::new());
    }
    let Some(unit) = &folder.plan.unit else { return Ok(Vec::new()) };
    let outputs = output_columns(&spec.outputs, columns, spec.outputs_given)?;
    if outputs.is_empty() {
        notes.push("no sensitivity outputs among the table's metrics (set `sweep.outputs`)".into());
    }
    let d = spec.parameters.len();
    let names: Vec<String> = spec.parameters.iter().map(|p| p.name()).collect();
    let mut rows = Vec::new();
    for (oi, o) in outputs.iter().enumerate() {
        let Some(Values::Number(y)) = columns.iter().find(|c| &c.name == o).map(|c| &c.values) else { continue };
        let mut stream = sensitivity::bootstrap_stream(spec.seed, oi as u64);
        match spec.design {
            Design::Morris => {
                let m = sensitivity::morris(unit, y, d, spec.levels, spec.bootstrap, spec.confidence, &mut stream);
                if m.trajectories < spec.samples {
                    notes.push(format!(
                        "{o}: Morris indices from {} of {} trajectories (the others miss outputs)",
                        m.trajectories, spec.samples
                    ));
                }
                for (k, name) in names.iter().enumerate() {
                    for (idx, v, c) in [
                        ("mu", m.mu[k], f64::NAN),
                        ("mu_star", m.mu_star[k], m.mu_star_conf[k]),
                        ("sigma", m.sigma[k], f64::NAN),
                    ] {
                        rows.push(SensitivityRow {
                            output: o.clone(),
                            method: "morris",
                            index: idx,
                            parameter: name.clone(),
                            parameter2: String::new(),
                            value: v,
                            conf: c,
                            samples: m.trajectories,
                        });
                    }
                }
            }
            Design::Saltelli => {
                let s = sensitivity::sobol(y, d, spec.second_order, spec.bootstrap, spec.confidence, &mut stream);
                if s.base_rows < spec.samples {
                    notes.push(format!(
                        "{o}: Sobol indices from {} of {} base rows (the others miss outputs)",
                        s.base_rows, spec.samples
                    ));
                }
                if s.constant {
                    notes.push(format!("{o}: the output is the same in every run: its indices are 0"));
                }
                for (k, name) in names.iter().enumerate() {
                    for (idx, v, c) in [("S1", s.s1[k], s.s1_conf[k]), ("ST", s.st[k], s.st_conf[k])] {
                        rows.push(SensitivityRow {
                            output: o.clone(),
                            method: "sobol",
                            index: idx,
                            parameter: name.clone(),
                            parameter2: String::new(),
                            value: v,
                            conf: c,
                            samples: s.base_rows,
                        });
                    }
                }
                if let (Some(s2), Some(s2c)) = (&s.s2, &s.s2_conf) {
                    for j in 0..d {
                        for k in j + 1..d {
                            rows.push(SensitivityRow {
                                output: o.clone(),
                                method: "sobol",
                                index: "S2",
                                parameter: names[j].clone(),
                                parameter2: names[k].clone(),
                                value: s2[j][k],
                                conf: s2c[j][k],
                                samples: s.base_rows,
                            });
                        }
                    }
                }
            }
            _ => {}
        }
    }
    Ok(rows)
}

/// `table.csv` text.
pub fn table_csv(columns: &[Column]) -> String {
    let mut s = columns.iter().map(|c| text(&c.name)).collect::<Vec<_>>().join(",");
    s.push('\n');
    let n = match columns.first().map(|c| &c.values) {
        Some(Values::Number(v)) => v.len(),
        Some(Values::Text(v)) => v.len(),
        None => 0,
    };
    for i in 0..n {
        let row: Vec<String> = columns
            .iter()
            .map(|c| match &c.values {
                Values::Number(v) if c.kind == "index" => format!("{}", v[i] as u64),
                Values::Number(v) => num(v[i]),
                Values::Text(v) => text(&v[i]),
            })
            .collect();
        s.push_str(&row.join(","));
        s.push('\n');
    }
    s
}

/// `columns.csv` text.
pub fn columns_csv(columns: &[Column]) -> String {
    let mut s = String::from("column,kind,units,description\n");
    for c in columns {
        s.push_str(&format!("{},{},{},{}\n", text(&c.name), c.kind, text(&c.units), text(&c.description)));
    }
    s
}

/// `sensitivity.csv` text.
pub fn sensitivity_csv(rows: &[SensitivityRow]) -> String {
    let mut s = String::from("output,method,index,parameter,parameter2,value,conf,samples\n");
    for r in rows {
        s.push_str(&format!(
            "{},{},{},{},{},{},{},{}\n",
            text(&r.output),
            r.method,
            r.index,
            text(&r.parameter),
            text(&r.parameter2),
            num(r.value),
            num(r.conf),
            r.samples
        ));
    }
    s
}

/// `runs.csv` text: where, how and how long each run was executed (not part of the table).
pub fn runs_csv(folder: &Folder, states: &[String]) -> String {
    let mut s = String::from("run,state,attempt,host,slurm_job,threads,resumed,wall_s,exit,error\n");
    for (i, st) in states.iter().enumerate() {
        let status = read_status(&folder.run_dir(i));
        let reason = folder.state(i, &|_| None).reason().map(str::to_string).unwrap_or_default();
        match status {
            Some(x) => s.push_str(&format!(
                "{i},{st},{},{},{},{},{},{},{},{}\n",
                x.attempt,
                text(&x.host),
                text(x.slurm_job.as_deref().unwrap_or("")),
                x.threads,
                x.resumed,
                x.wall_s.map_or("NA".into(), num),
                text(x.exit.as_deref().unwrap_or("")),
                text(&reason)
            )),
            None => s.push_str(&format!("{i},{st},0,,,,,NA,,\n")),
        }
    }
    s
}

fn h5_text(path: &Path, s: &str) -> Result<VarLenUnicode> {
    VarLenUnicode::from_str(s).map_err(|e| SweepError::Hdf5 {
        path: path.to_path_buf(),
        what: "a text value cannot be stored".into(),
        source: hdf5::Error::from(e.to_string().as_str()),
    })
}

fn write_columns(path: &Path, g: &hdf5::Group, columns: &[Column]) -> Result<()> {
    let err = |what: &str| SweepError::hdf5(path, what.to_string());
    for c in columns {
        let ds = match &c.values {
            Values::Number(v) => g
                .new_dataset_builder()
                .with_data(v.as_slice())
                .create(c.name.as_str())
                .map_err(err(&format!("cannot write column {}", c.name)))?,
            Values::Text(v) => {
                let t = v.iter().map(|s| h5_text(path, s)).collect::<Result<Vec<_>>>()?;
                g.new_dataset_builder()
                    .with_data(t.as_slice())
                    .create(c.name.as_str())
                    .map_err(err(&format!("cannot write column {}", c.name)))?
            }
        };
        interstice_sim::io::write_string_attr(&ds, "units", &c.units).map_err(err("cannot write an attribute"))?;
        interstice_sim::io::write_string_attr(&ds, "kind", c.kind).map_err(err("cannot write an attribute"))?;
        interstice_sim::io::write_string_attr(&ds, "description", &c.description)
            .map_err(err("cannot write an attribute"))?;
    }
    let order = columns.iter().map(|c| h5_text(path, &c.name)).collect::<Result<Vec<_>>>()?;
    g.new_attr::<VarLenUnicode>()
        .shape(order.len())
        .create("columns")
        .and_then(|a| a.write_raw(&order))
        .map_err(err("cannot write the column order"))?;
    Ok(())
}

/// `table.h5`: the table and the sensitivity rows.
pub fn write_h5(path: &Path, folder: &Folder, agg: &Aggregate) -> Result<()> {
    let tmp = path.with_extension(format!("tmp-{}", std::process::id()));
    {
        let err = |what: &str| SweepError::hdf5(&tmp, what.to_string());
        let f = hdf5::File::create(&tmp).map_err(err("cannot create the file"))?;
        interstice_sim::io::write_string_attr(&f, "format", "interstice-sweep-table")
            .map_err(err("cannot write an attribute"))?;
        interstice_sim::io::write_string_attr(&f, "sweep", &folder.plan.spec.name)
            .map_err(err("cannot write an attribute"))?;
        interstice_sim::io::write_string_attr(&f, "design", folder.plan.spec.design.name())
            .map_err(err("cannot write an attribute"))?;
        interstice_sim::io::write_string_attr(&f, "caution", interstice_analysis::CAUTION)
            .map_err(err("cannot write an attribute"))?;
        let t = f.create_group("table").map_err(err("cannot create /table"))?;
        write_columns(&tmp, &t, &agg.columns)?;
        let r = &agg.sensitivity;
        let sens = vec![
            Column {
                name: "output".into(),
                kind: "text",
                units: String::new(),
                description: "output column".into(),
                values: Values::Text(r.iter().map(|x| x.output.clone()).collect()),
            },
            Column {
                name: "method".into(),
                kind: "text",
                units: String::new(),
                description: "morris or sobol".into(),
                values: Values::Text(r.iter().map(|x| x.method.to_string()).collect()),
            },
            Column {
                name: "index".into(),
                kind: "text",
                units: String::new(),
                description: "mu, mu_star, sigma, S1, ST, S2".into(),
                values: Values::Text(r.iter().map(|x| x.index.to_string()).collect()),
            },
            Column {
                name: "parameter".into(),
                kind: "text",
                units: String::new(),
                description: "factor".into(),
                values: Values::Text(r.iter().map(|x| x.parameter.clone()).collect()),
            },
            Column {
                name: "parameter2".into(),
                kind: "text",
                units: String::new(),
                description: "second factor of S2".into(),
                values: Values::Text(r.iter().map(|x| x.parameter2.clone()).collect()),
            },
            Column {
                name: "value".into(),
                kind: "number",
                units: "output units per unit range (Morris), 1 (Sobol)".into(),
                description: "index".into(),
                values: Values::Number(r.iter().map(|x| x.value).collect()),
            },
            Column {
                name: "conf".into(),
                kind: "number",
                units: "as value".into(),
                description: "half-width of the bootstrap confidence interval".into(),
                values: Values::Number(r.iter().map(|x| x.conf).collect()),
            },
            Column {
                name: "samples".into(),
                kind: "number",
                units: "1".into(),
                description: "trajectories or base rows used".into(),
                values: Values::Number(r.iter().map(|x| x.samples as f64).collect()),
            },
        ];
        let s = f.create_group("sensitivity").map_err(err("cannot create /sensitivity"))?;
        write_columns(&tmp, &s, &sens)?;
        f.close().map_err(err("cannot close the file"))?;
    }
    std::fs::rename(&tmp, path).map_err(SweepError::io(path, "cannot put the file in place"))
}

/// Writes the aggregate files into `<folder>/aggregate/` (or `out`); returns their paths.
pub fn write(folder: &Folder, agg: &Aggregate, out: Option<&Path>) -> Result<Vec<PathBuf>> {
    let dir = out.map_or_else(|| folder.root.join("aggregate"), Path::to_path_buf);
    std::fs::create_dir_all(&dir).map_err(SweepError::io(&dir, "cannot create the folder"))?;
    let mut files = Vec::new();
    let mut put = |name: &str, text: String| -> Result<()> {
        let p = dir.join(name);
        write_atomic(&p, text.as_bytes())?;
        files.push(p);
        Ok(())
    };
    put("table.csv", table_csv(&agg.columns))?;
    put("columns.csv", columns_csv(&agg.columns))?;
    put("runs.csv", runs_csv(folder, &agg.states))?;
    if !agg.sensitivity.is_empty() || matches!(folder.plan.spec.design, Design::Morris | Design::Saltelli) {
        put("sensitivity.csv", sensitivity_csv(&agg.sensitivity))?;
    }
    let h5 = dir.join("table.h5");
    write_h5(&h5, folder, agg)?;
    files.push(h5);
    Ok(files)
}
