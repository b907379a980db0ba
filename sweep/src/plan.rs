//! Expanding a sweep into runs: each run's parameters, seed and scenario text.
//!
//! Expansion is a pure function of the sweep file and the base scenario: run i always gets the
//! same parameters and the same seed, `rng::stream_key(seed, Domain::Sweep, i, 0) >> 1` (63 bits,
//! so that it fits a TOML integer), or the sweep seed itself with `seeds = "shared"`.

use std::path::{Path, PathBuf};

use interstice_sim::LoadedScenario;
use interstice_sim::rng::{Domain, stream_key};

use crate::design;
use crate::error::{Result, SweepError};
use crate::spec::{Design, Parameter, SeedMode, Segment, SweepSpec, Values, parse_path};

/// One run of a sweep.
#[derive(Debug, Clone, PartialEq)]
pub struct PlannedRun {
    pub index: usize,
    pub seed: u64,
    /// One value per column of [`Plan::columns`].
    pub values: Vec<toml::Value>,
}

/// A sweep expanded into its runs.
#[derive(Debug, Clone)]
pub struct Plan {
    pub spec: SweepSpec,
    base: toml::Table,
    /// The runs, in index order.
    pub runs: Vec<PlannedRun>,
    /// The design on the unit hypercube (sampled designs): one row per run, one column per factor.
    pub unit: Option<Vec<Vec<f64>>>,
}

/// The seed of run `index` of a sweep with seed `seed`.
pub fn run_seed(seed: u64, mode: SeedMode, index: usize) -> u64 {
    match mode {
        SeedMode::PerRun => stream_key(seed, Domain::Sweep, index as u64, 0) >> 1,
        SeedMode::Shared => seed,
    }
}

/// The folder name of run `index`: six digits or more.
pub fn run_dir_name(index: usize) -> String {
    format!("{index:06}")
}

/// Sets `path` in a TOML table, creating tables on the way; arrays must already hold the index.
pub fn set_path(table: &mut toml::Table, path: &str, value: toml::Value) -> std::result::Result<(), String> {
    let segs = parse_path(path).ok_or_else(|| format!("`{path}` is not a key path"))?;
    let mut cur: &mut toml::Value = {
        let Some(Segment::Key(first)) = segs.first() else {
            return Err(format!("`{path}` does not start with a key"));
        };
        if segs.len() == 1 {
            table.insert(first.clone(), value);
            return Ok(());
        }
        let next_is_index = matches!(segs.get(1), Some(Segment::Index(_)));
        if !table.contains_key(first) {
            if next_is_index {
                return Err(format!("the base scenario has no `{first}` array"));
            }
            table.insert(first.clone(), toml::Value::Table(toml::Table::new()));
        }
        table.get_mut(first).expect("just inserted")
    };
    let mut walked = match &segs[0] {
        Segment::Key(k) => k.clone(),
        Segment::Index(_) => unreachable!(),
    };
    for (n, seg) in segs.iter().enumerate().skip(1) {
        let last = n + 1 == segs.len();
        let next_is_index = matches!(segs.get(n + 1), Some(Segment::Index(_)));
        match seg {
            Segment::Key(k) => {
                let t = cur.as_table_mut().ok_or_else(|| format!("`{walked}` is not a table"))?;
                if last {
                    t.insert(k.clone(), value);
                    return Ok(());
                }
                if !t.contains_key(k) {
                    if next_is_index {
                        return Err(format!("the base scenario has no `{walked}.{k}` array"));
                    }
                    t.insert(k.clone(), toml::Value::Table(toml::Table::new()));
                }
                walked = format!("{walked}.{k}");
                cur = t.get_mut(k).expect("present");
            }
            Segment::Index(i) => {
                let a = cur.as_array_mut().ok_or_else(|| format!("`{walked}` is not an array"))?;
                let len = a.len();
                let slot = a.get_mut(*i).ok_or_else(|| {
                    format!("`{walked}[{i}]` does not exist: the base scenario's `{walked}` has {len} entries")
                })?;
                if last {
                    *slot = value;
                    return Ok(());
                }
                walked = format!("{walked}[{i}]");
                cur = slot;
            }
        }
    }
    Ok(())
}

fn number(x: f64, integer: bool) -> toml::Value {
    if integer { toml::Value::Integer(x as i64) } else { toml::Value::Float(x) }
}

impl Plan {
    /// Expands a checked sweep: validates the base scenario, builds every run and validates
    /// every run's scenario with the engine's own checks (the run index in the message).
    pub fn new(spec: SweepSpec) -> Result<Plan> {
        let base_loaded = LoadedScenario::from_text(&spec.scenario_path, spec.scenario_text.clone())
            .map_err(|source| SweepError::Base { sweep: spec.file.clone(), source })?;
        let base: toml::Table = toml::from_str(&base_loaded.text)
            .map_err(|e| SweepError::Read { file: spec.scenario_path.clone(), reason: e.to_string() })?;
        let n = spec.run_count();
        let d = spec.parameters.len();
        let mut stream = design::sampling_stream(spec.seed);
        let unit = match spec.design {
            Design::List | Design::Grid => None,
            Design::LatinHypercube => Some(design::latin_hypercube(n, d, &mut stream)),
            Design::Morris => Some(design::morris(spec.samples, d, spec.levels, &mut stream)),
            Design::Saltelli => Some(design::saltelli(spec.samples, d, spec.second_order, &mut stream)),
        };
        let sizes: Vec<usize> = spec
            .parameters
            .iter()
            .map(|p| match &p.values {
                Values::Listed(v) => v.len(),
                Values::Range { .. } => 0,
            })
            .collect();
        let mut runs = Vec::with_capacity(n);
        for i in 0..n {
            let mut values = Vec::new();
            for (k, p) in spec.parameters.iter().enumerate() {
                match &p.values {
                    Values::Listed(v) => {
                        let j = if spec.design == Design::Grid { design::grid_indices(i, &sizes)[k] } else { i };
                        let chosen = &v[j];
                        if p.keys.len() > 1 {
                            values.extend(chosen.as_array().expect("checked: one value per key").iter().cloned());
                        } else {
                            values.push(chosen.clone());
                        }
                    }
                    Values::Range { integer, .. } => {
                        let u = unit.as_ref().expect("sampled design")[i][k];
                        values.push(number(p.at(u), *integer));
                    }
                }
            }
            runs.push(PlannedRun { index: i, seed: run_seed(spec.seed, spec.seeds, i), values });
        }
        let plan = Plan { spec, base, runs, unit };
        plan.check_paths()?;
        for i in 0..plan.runs.len() {
            plan.loaded(i, Path::new(&format!("runs/{}/scenario.toml", run_dir_name(i))))?;
        }
        Ok(plan)
    }

    /// Checks once that every key path can be set in the base scenario.
    fn check_paths(&self) -> Result<()> {
        let Some(run) = self.runs.first() else { return Ok(()) };
        let mut t = self.base.clone();
        let mut problems = Vec::new();
        for ((k, v), (pi, ki)) in self.columns().iter().zip(run.values.iter()).zip(self.column_origin()) {
            if let Err(e) = set_path(&mut t, k, v.clone()) {
                let path = if self.spec.parameters[pi].keys.len() > 1 {
                    format!("parameter[{pi}].keys[{ki}]")
                } else {
                    format!("parameter[{pi}].key")
                };
                problems.push(interstice_sim::scenario::Problem {
                    path,
                    value: format!("{k:?}"),
                    expected: format!("a key the base scenario can hold: {e}"),
                    line: None,
                });
            }
        }
        if problems.is_empty() {
            return Ok(());
        }
        let idx = interstice_sim::scenario::spans::SpanIndex::new(&self.spec.text);
        for p in &mut problems {
            p.line = idx.line_of_path(&p.path);
        }
        Err(SweepError::Invalid { file: self.spec.file.clone(), problems })
    }

    /// (parameter, key within it) of each column.
    fn column_origin(&self) -> Vec<(usize, usize)> {
        self.spec.parameters.iter().enumerate().flat_map(|(i, p)| (0..p.keys.len()).map(move |k| (i, k))).collect()
    }

    /// The scenario keys the sweep sets, one column each.
    pub fn columns(&self) -> Vec<String> {
        self.spec.parameters.iter().flat_map(|p| p.keys.iter().cloned()).collect()
    }

    /// The factors (for sensitivity analysis).
    pub fn parameters(&self) -> &[Parameter] {
        &self.spec.parameters
    }

    /// The name of run `index` (its run file is `<name>.h5`).
    pub fn run_name(&self, index: usize) -> String {
        format!("{}-{}", self.spec.name, run_dir_name(index))
    }

    /// `key = value, ...` of a run, for messages.
    pub fn describe(&self, index: usize) -> String {
        let r = &self.runs[index];
        self.columns().iter().zip(&r.values).map(|(k, v)| format!("{k} = {v}")).collect::<Vec<_>>().join(", ")
    }

    /// The scenario text of run `index`.
    pub fn scenario_text(&self, index: usize) -> String {
        let r = &self.runs[index];
        let mut t = self.base.clone();
        for (k, v) in self.columns().iter().zip(&r.values) {
            set_path(&mut t, k, v.clone()).expect("paths checked by Plan::new");
        }
        set_path(&mut t, "run.name", toml::Value::String(self.run_name(index))).expect("run is a table");
        set_path(&mut t, "run.seed", toml::Value::Integer(r.seed as i64)).expect("run is a table");
        let body = toml::to_string(&t).unwrap_or_default();
        format!(
            "# Run {index} of sweep `{}` ({} design), written by `interstice sweep`.\n# Base scenario: {}\n# {}\n# seed = {}\n\n{body}",
            self.spec.name,
            self.spec.design.name(),
            self.spec.scenario_key.display(),
            self.describe(index),
            r.seed
        )
    }

    /// The checked scenario of run `index`; `file` names it in messages.
    pub fn loaded(&self, index: usize, file: &Path) -> Result<LoadedScenario> {
        LoadedScenario::from_text(file, self.scenario_text(index)).map_err(|source| SweepError::RunInvalid {
            sweep: self.spec.file.clone(),
            index,
            params: self.describe(index),
            source,
        })
    }

    /// The numeric value of column `k` of run `i` (NaN for text and flags).
    pub fn numeric(&self, i: usize, k: usize) -> f64 {
        let v = &self.runs[i].values[k];
        v.as_float().or_else(|| v.as_integer().map(|n| n as f64)).unwrap_or(f64::NAN)
    }

    /// Where run `index` lives inside a sweep folder.
    pub fn run_dir(root: &Path, index: usize) -> PathBuf {
        root.join("runs").join(run_dir_name(index))
    }
}
