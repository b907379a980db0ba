//! Sweep files: a base scenario and the parameters to vary, read and checked like scenarios.
//!
//! ```toml
//! [sweep]
//! name = "sizes"                 # runs are named <name>-NNNNNN
//! scenario = "base.toml"         # the base scenario, relative to this file
//! design = "grid"                # list | grid | latin-hypercube | morris | saltelli
//! seed = 11                      # sampling and run seeds (default: the scenario's run.seed)
//!
//! [[parameter]]
//! key = "particle[0].hydrodynamic_radius_nm"
//! values = [20.0, 50.0, 100.0]   # list and grid designs
//!
//! [[parameter]]
//! key = "particle[0].ligand.kon_per_M_s"
//! min = 1.0e4                    # sampled designs: a range ...
//! max = 1.0e6
//! scale = "log"                  # ... uniform in the value ("linear") or in its logarithm ("log")
//! ```
//!
//! Every problem names the sweep file, line, key, value and what is allowed. Keys are scenario key
//! paths (`section.key`, `particle[i].key`, `lattice.shape[0]`) whose names carry their unit;
//! numeric values and ranges are checked against the scenario key's own allowed range.

use std::path::{Path, PathBuf};

use interstice_sim::scenario::spans::SpanIndex;
use interstice_sim::scenario::{Check, Problem, Scenario};
use serde::{Deserialize, Serialize};

use crate::error::{Result, SweepError};

/// How the runs of a sweep are chosen.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Design {
    /// Run i takes the i-th value of every parameter (all lists equally long).
    List,
    /// Every combination of the parameters' values (the first parameter varies slowest).
    Grid,
    /// `samples` runs, each parameter's range cut into `samples` strata hit once each.
    LatinHypercube,
    /// `samples` Morris trajectories of D + 1 runs on a grid of `levels` levels.
    Morris,
    /// Saltelli's cross-sampled design of `samples` base rows: N (D + 2) runs, or N (2D + 2)
    /// with `second_order`.
    Saltelli,
}

impl Design {
    /// Whether the design samples ranges (`min`, `max`) rather than listing values.
    pub fn sampled(self) -> bool {
        matches!(self, Design::LatinHypercube | Design::Morris | Design::Saltelli)
    }

    /// The name as written in a sweep file.
    pub fn name(self) -> &'static str {
        match self {
            Design::List => "list",
            Design::Grid => "grid",
            Design::LatinHypercube => "latin-hypercube",
            Design::Morris => "morris",
            Design::Saltelli => "saltelli",
        }
    }
}

/// How a sampled parameter's unit interval maps onto its range.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Scale {
    /// Uniform in the value.
    #[default]
    Linear,
    /// Uniform in the logarithm of the value (both ends positive).
    Log,
}

/// Which seed each run gets.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum SeedMode {
    /// Run i gets its own seed derived from the sweep seed and i.
    #[default]
    PerRun,
    /// Every run gets the sweep seed (common random numbers: differences between runs come from
    /// the parameters alone).
    Shared,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
struct SweepSection {
    name: String,
    scenario: PathBuf,
    design: Design,
    seed: Option<u64>,
    #[serde(default)]
    seeds: SeedMode,
    samples: Option<u64>,
    levels: Option<u64>,
    #[serde(default)]
    second_order: bool,
    #[serde(default)]
    outputs: Vec<String>,
    bootstrap: Option<u64>,
    confidence: Option<f64>,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
struct ParameterToml {
    key: Option<String>,
    keys: Option<Vec<String>>,
    values: Option<Vec<toml::Value>>,
    min: Option<f64>,
    max: Option<f64>,
    scale: Option<Scale>,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
struct SweepToml {
    sweep: SweepSection,
    #[serde(default)]
    parameter: Vec<ParameterToml>,
}

/// What a parameter takes: listed values or a sampled range.
#[derive(Debug, Clone, PartialEq)]
pub enum Values {
    /// Values as written; with several keys each value is an array with one entry per key.
    Listed(Vec<toml::Value>),
    /// A range sampled by the design.
    Range { min: f64, max: f64, scale: Scale, integer: bool },
}

/// One factor of the sweep: one key (or several keys varied together) and its values.
#[derive(Debug, Clone, PartialEq)]
pub struct Parameter {
    /// Scenario key paths set by this factor.
    pub keys: Vec<String>,
    pub values: Values,
}

impl Parameter {
    /// The factor's name in tables: its key, or its keys joined by `+`.
    pub fn name(&self) -> String {
        self.keys.join("+")
    }

    /// The value at `u` in [0, 1] of a sampled range (integers rounded).
    pub fn at(&self, u: f64) -> f64 {
        match &self.values {
            Values::Range { min, max, scale, integer } => {
                let x = match scale {
                    Scale::Linear => min + u * (max - min),
                    Scale::Log => 10f64.powf(min.log10() + u * (max.log10() - min.log10())),
                };
                // Keep the ends exact (and inside the key's range) whatever the rounding.
                let x = x.clamp(*min, *max);
                if *integer { x.round() } else { x }
            }
            Values::Listed(_) => f64::NAN,
        }
    }
}

/// Default outputs of sensitivity analysis: these metrics of every species (`*`).
pub const DEFAULT_OUTPUTS: &[&str] = &[
    "*:tumour_percent_id",
    "*:auc_tumour_percent_id_per_g",
    "*:peak_tumour_percent_id_per_g",
    "*:coverage_fraction",
    "*:bsb_index_vessel",
];

/// A checked sweep file.
#[derive(Debug, Clone, PartialEq)]
pub struct SweepSpec {
    /// The sweep file (messages only).
    pub file: PathBuf,
    /// Its text as written.
    pub text: String,
    pub name: String,
    /// The base scenario's path as resolved (relative paths from the sweep file's folder).
    pub scenario_path: PathBuf,
    /// The base scenario's path as written in the sweep file.
    pub scenario_key: PathBuf,
    /// The base scenario's text.
    pub scenario_text: String,
    pub design: Design,
    /// Seed of sampling and of the runs' seeds.
    pub seed: u64,
    pub seeds: SeedMode,
    /// Latin hypercube: runs; Morris: trajectories; Saltelli: base rows.
    pub samples: usize,
    /// Morris grid levels.
    pub levels: usize,
    pub second_order: bool,
    /// Output columns (or `*:quantity` patterns) of sensitivity analysis.
    pub outputs: Vec<String>,
    /// Whether the sweep file named its outputs (otherwise [`DEFAULT_OUTPUTS`], where present).
    pub outputs_given: bool,
    /// Bootstrap resamples of the confidence intervals.
    pub bootstrap: usize,
    /// Confidence level of the intervals.
    pub confidence: f64,
    pub parameters: Vec<Parameter>,
}

/// Largest number of runs a sweep may have.
pub const MAX_RUNS: usize = 10_000_000;

fn problem(path: impl Into<String>, value: impl Into<String>, expected: impl Into<String>) -> Problem {
    Problem { path: path.into(), value: value.into(), expected: expected.into(), line: None }
}

/// Splits a key path into its segments: `particle[0].ligand.kon_per_M_s` ->
/// `particle`, `[0]`, `ligand`, `kon_per_M_s`.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Segment {
    Key(String),
    Index(usize),
}

/// Parses a key path; `None` when it is not of the form `a.b[1].c`.
pub fn parse_path(path: &str) -> Option<Vec<Segment>> {
    let mut out = Vec::new();
    for part in path.split('.') {
        let (name, mut rest) = match part.find('[') {
            Some(i) => (&part[..i], &part[i..]),
            None => (part, ""),
        };
        if name.is_empty() || !name.chars().all(|c| c.is_ascii_alphanumeric() || c == '_') {
            return None;
        }
        out.push(Segment::Key(name.to_string()));
        while !rest.is_empty() {
            let close = rest.find(']')?;
            if !rest.starts_with('[') {
                return None;
            }
            let i: usize = rest[1..close].parse().ok()?;
            out.push(Segment::Index(i));
            rest = &rest[close + 1..];
        }
    }
    Some(out)
}

/// The key's documented check, from the engine's section declarations: `Ok(None)` for a key
/// without a numeric range (strings, flags), `Err(expected)` for an unknown key.
pub fn key_check(path: &str) -> std::result::Result<Option<Check>, String> {
    let Some(segs) = parse_path(path) else {
        return Err("a key path such as `matrix.tumour_porosity` or `particle[0].hydrodynamic_radius_nm`".into());
    };
    let names: Vec<&str> = segs
        .iter()
        .filter_map(|s| match s {
            Segment::Key(k) => Some(k.as_str()),
            Segment::Index(_) => None,
        })
        .collect();
    let Some((key, section)) = names.split_last() else {
        return Err("a key path".into());
    };
    let section = section.join(".");
    let sections = Scenario::sections();
    let Some(sec) = sections.iter().find(|s| s.name.trim_matches(['[', ']']) == section) else {
        let known: Vec<&str> = sections.iter().map(|s| s.name.trim_matches(['[', ']'])).collect();
        return Err(format!("a key of one of the scenario sections {}", known.join(", ")));
    };
    match sec.keys.iter().find(|k| k.key == *key) {
        Some(k) => Ok(k.check),
        None => {
            let known: Vec<&str> = sec.keys.iter().map(|k| k.key).collect();
            Err(format!("one of the keys of [{section}]: {} (see `interstice defaults`)", known.join(", ")))
        }
    }
}

fn value_text(v: &toml::Value) -> String {
    v.to_string()
}

impl SweepSpec {
    /// Reads and checks a sweep file and reads its base scenario (checked by [`crate::plan`]).
    pub fn from_file(path: &Path) -> Result<SweepSpec> {
        let text = std::fs::read_to_string(path)
            .map_err(|e| SweepError::Read { file: path.to_path_buf(), reason: e.to_string() })?;
        let spec = SweepSpec::from_text(path, text, None)?;
        Ok(spec)
    }

    /// Checks sweep text; `file` names it in messages and anchors the base scenario's relative
    /// path. `scenario_text` replaces reading the base scenario (a sweep folder keeps its own copy).
    pub fn from_text(file: &Path, text: String, scenario_text: Option<(PathBuf, String)>) -> Result<SweepSpec> {
        let idx = SpanIndex::new(&text);
        let raw: SweepToml = match toml::from_str(&text) {
            Ok(r) => r,
            Err(e) => {
                let span = e.span();
                let path = span.as_ref().and_then(|s| idx.path_at(s)).unwrap_or_default();
                let line = span.map(|s| idx.line_of(s.start));
                let msg = e.message().trim().to_string();
                let (value, expected) = match msg.strip_prefix("unknown field ") {
                    Some(rest) => {
                        let names: Vec<&str> = rest.split('`').skip(1).step_by(2).collect();
                        match names.split_first() {
                            Some((bad, known)) => {
                                (format!("unknown key `{bad}`"), format!("one of {}", known.join(", ")))
                            }
                            None => (String::new(), msg.clone()),
                        }
                    }
                    None => (String::new(), msg.clone()),
                };
                return Err(SweepError::Invalid {
                    file: file.to_path_buf(),
                    problems: vec![Problem {
                        path: if path.is_empty() { "(document)".into() } else { path },
                        value,
                        expected,
                        line,
                    }],
                });
            }
        };
        let mut problems = Vec::new();
        let spec = Self::check(file, &text, raw, scenario_text, &mut problems);
        for p in &mut problems {
            p.line = idx.line_of_path(&p.path);
        }
        match spec {
            Some(s) if problems.is_empty() => Ok(s),
            _ => Err(SweepError::Invalid { file: file.to_path_buf(), problems }),
        }
    }

    fn check(
        file: &Path,
        text: &str,
        raw: SweepToml,
        scenario_text: Option<(PathBuf, String)>,
        out: &mut Vec<Problem>,
    ) -> Option<SweepSpec> {
        let s = &raw.sweep;
        if s.name.is_empty() || !s.name.chars().all(|c| c.is_ascii_alphanumeric() || "-_.".contains(c)) {
            out.push(problem(
                "sweep.name",
                format!("{:?}", s.name),
                "a non-empty name of letters, digits, '-', '_' and '.'",
            ));
        }
        let (scenario_path, scenario_text) = match scenario_text {
            Some(st) => st,
            None => {
                let p = if s.scenario.is_absolute() {
                    s.scenario.clone()
                } else {
                    file.parent().unwrap_or(Path::new("")).join(&s.scenario)
                };
                match std::fs::read_to_string(&p) {
                    Ok(t) => (p, t),
                    Err(e) => {
                        out.push(problem(
                            "sweep.scenario",
                            format!("{:?}", s.scenario.display().to_string()),
                            format!(
                                "a readable scenario file (relative to the sweep file's folder): {}: {e}",
                                p.display()
                            ),
                        ));
                        (p, String::new())
                    }
                }
            }
        };
        if let Some(seed) = s.seed
            && seed > i64::MAX as u64
        {
            out.push(problem("sweep.seed", seed.to_string(), format!("a whole number in [0, {}]", i64::MAX)));
        }
        let d = raw.parameter.len();
        if d == 0 {
            out.push(problem("parameter", "none", "at least one [[parameter]] table"));
        }
        let design = s.design;
        // Counts of the design.
        let need_samples = design.sampled();
        let samples = match (need_samples, s.samples) {
            (true, None) => {
                out.push(problem(
                    "sweep.samples",
                    "",
                    format!(
                        "`samples` for the {} design ({})",
                        design.name(),
                        match design {
                            Design::LatinHypercube => "the number of runs",
                            Design::Morris => "the number of trajectories",
                            _ => "the number of base rows N",
                        }
                    ),
                ));
                0
            }
            (true, Some(n)) => {
                let lo = if design == Design::LatinHypercube { 1 } else { 2 };
                if n < lo || n as usize > MAX_RUNS {
                    out.push(problem("sweep.samples", n.to_string(), format!("a whole number in [{lo}, {MAX_RUNS}]")));
                }
                n as usize
            }
            (false, Some(n)) => {
                out.push(problem(
                    "sweep.samples",
                    n.to_string(),
                    format!("no `samples` for the {} design (its runs come from the values)", design.name()),
                ));
                0
            }
            (false, None) => 0,
        };
        let levels = match (design, s.levels) {
            (Design::Morris, None) => 4,
            (Design::Morris, Some(p)) => {
                if !(2..=1000).contains(&p) || p % 2 != 0 {
                    out.push(problem("sweep.levels", p.to_string(), "an even whole number in [2, 1000]"));
                }
                p as usize
            }
            (_, Some(p)) => {
                out.push(problem("sweep.levels", p.to_string(), "`levels` only with the morris design"));
                0
            }
            (_, None) => 0,
        };
        if s.second_order && design != Design::Saltelli {
            out.push(problem("sweep.second_order", "true", "`second_order` only with the saltelli design"));
        }
        if s.second_order && d < 2 {
            out.push(problem("sweep.second_order", "true", "at least two parameters for second-order indices"));
        }
        let bootstrap = s.bootstrap.unwrap_or(1000);
        if !(10..=100_000).contains(&bootstrap) {
            out.push(problem("sweep.bootstrap", bootstrap.to_string(), "a whole number in [10, 100000]"));
        }
        let confidence = s.confidence.unwrap_or(0.95);
        if !(confidence > 0.0 && confidence < 1.0) {
            out.push(problem("sweep.confidence", confidence.to_string(), "a finite number in (0, 1)"));
        }
        for (i, o) in s.outputs.iter().enumerate() {
            if o.trim().is_empty() || o.contains(',') {
                out.push(problem(
                    format!("sweep.outputs[{i}]"),
                    format!("{o:?}"),
                    "a column of the aggregate table, or `*:quantity` for every species",
                ));
            }
        }
        let mut parameters = Vec::new();
        let mut seen = std::collections::BTreeSet::new();
        for (i, p) in raw.parameter.iter().enumerate() {
            let at = |k: &str| format!("parameter[{i}].{k}");
            let keys: Vec<String> = match (&p.key, &p.keys) {
                (Some(k), None) => vec![k.clone()],
                (None, Some(ks)) if !ks.is_empty() => ks.clone(),
                (None, Some(_)) => {
                    out.push(problem(at("keys"), "[]", "at least one key"));
                    continue;
                }
                (None, None) => {
                    out.push(problem(format!("parameter[{i}]"), "", "`key` (or `keys` for keys varied together)"));
                    continue;
                }
                (Some(_), Some(_)) => {
                    out.push(problem(at("keys"), "", "either `key` or `keys`, not both"));
                    continue;
                }
            };
            let key_at = |j: usize| if p.keys.is_some() { format!("parameter[{i}].keys[{j}]") } else { at("key") };
            let mut checks = Vec::new();
            let mut keys_ok = true;
            for (j, k) in keys.iter().enumerate() {
                if k == "run.seed" || k == "run.name" {
                    out.push(problem(
                        key_at(j),
                        format!("{k:?}"),
                        "a key other than run.seed and run.name (the sweep sets them: `sweep.seed`, `sweep.seeds`, `sweep.name`)",
                    ));
                    keys_ok = false;
                    continue;
                }
                match key_check(k) {
                    Ok(c) => checks.push(c),
                    Err(expected) => {
                        out.push(problem(key_at(j), format!("{k:?}"), expected));
                        keys_ok = false;
                    }
                }
                if !seen.insert(k.clone()) {
                    out.push(problem(key_at(j), format!("{k:?}"), "a key no other parameter varies"));
                    keys_ok = false;
                }
            }
            if !keys_ok {
                continue;
            }
            let values = if design.sampled() {
                if p.values.is_some() {
                    out.push(problem(
                        at("values"),
                        "",
                        format!("`min` and `max` for the {} design (it samples ranges)", design.name()),
                    ));
                    continue;
                }
                if keys.len() > 1 {
                    out.push(problem(
                        at("keys"),
                        "",
                        format!("one `key` per parameter in the {} design", design.name()),
                    ));
                    continue;
                }
                let (Some(min), Some(max)) = (p.min, p.max) else {
                    out.push(problem(format!("parameter[{i}]"), "", "`min` and `max`"));
                    continue;
                };
                let scale = p.scale.unwrap_or_default();
                let check = checks[0];
                let mut ok = true;
                for (name, v) in [("min", min), ("max", max)] {
                    if let Some(c) = &check
                        && !c.accepts(v)
                    {
                        out.push(problem(at(name), v.to_string(), format!("{c} (the range of `{}`)", keys[0])));
                        ok = false;
                    } else if !v.is_finite() {
                        out.push(problem(at(name), v.to_string(), "a finite number"));
                        ok = false;
                    }
                }
                if ok && min >= max {
                    out.push(problem(at("max"), max.to_string(), format!("a number above min = {min}")));
                    ok = false;
                }
                if ok && scale == Scale::Log && min <= 0.0 {
                    out.push(problem(at("min"), min.to_string(), "a number above 0 with scale = \"log\""));
                    ok = false;
                }
                let integer = check.is_some_and(|c| c.integer);
                if integer && matches!(design, Design::Morris | Design::Saltelli) {
                    out.push(problem(
                        at("key"),
                        format!("{:?}", keys[0]),
                        format!(
                            "a key with continuous values in the {} design (this one takes whole numbers)",
                            design.name()
                        ),
                    ));
                    ok = false;
                }
                if check.is_none() {
                    out.push(problem(at("key"), format!("{:?}", keys[0]), "a numeric key for a sampled range"));
                    ok = false;
                }
                if !ok {
                    continue;
                }
                Values::Range { min, max, scale, integer }
            } else {
                if p.min.is_some() || p.max.is_some() || p.scale.is_some() {
                    out.push(problem(
                        at("min"),
                        "",
                        format!(
                            "`values` for the {} design (`min`, `max` and `scale` are for sampled designs)",
                            design.name()
                        ),
                    ));
                    continue;
                }
                let Some(vals) = &p.values else {
                    out.push(problem(format!("parameter[{i}]"), "", "`values`: a list of the values to run"));
                    continue;
                };
                if vals.is_empty() {
                    out.push(problem(at("values"), "[]", "at least one value"));
                    continue;
                }
                for (j, v) in vals.iter().enumerate() {
                    let items: Vec<&toml::Value> = if keys.len() > 1 {
                        match v.as_array() {
                            Some(a) if a.len() == keys.len() => a.iter().collect(),
                            _ => {
                                out.push(problem(
                                    format!("parameter[{i}].values[{j}]"),
                                    value_text(v),
                                    format!("an array of {} values, one per key of `keys`", keys.len()),
                                ));
                                continue;
                            }
                        }
                    } else {
                        vec![v]
                    };
                    for (kk, item) in items.into_iter().enumerate() {
                        let num = item.as_float().or_else(|| item.as_integer().map(|n| n as f64));
                        if let (Some(Some(c)), Some(x)) = (checks.get(kk), num)
                            && !c.accepts(x)
                        {
                            out.push(problem(
                                format!("parameter[{i}].values[{j}]"),
                                value_text(item),
                                format!("{c} (the range of `{}`)", keys[kk]),
                            ));
                        }
                        if let (Some(Some(_)), None) = (checks.get(kk), num) {
                            out.push(problem(
                                format!("parameter[{i}].values[{j}]"),
                                value_text(item),
                                format!("a number (`{}` is numeric)", keys[kk]),
                            ));
                        }
                    }
                }
                Values::Listed(vals.clone())
            };
            parameters.push(Parameter { keys, values });
        }
        if design == Design::List && !parameters.is_empty() {
            let n0 = listed_len(&parameters[0]);
            for (i, p) in parameters.iter().enumerate().skip(1) {
                if listed_len(p) != n0 {
                    out.push(problem(
                        format!("parameter[{i}].values"),
                        format!("{} values", listed_len(p)),
                        format!("{n0} values, as many as parameter[0] (the list design runs them side by side)"),
                    ));
                }
            }
        }
        let spec = SweepSpec {
            file: file.to_path_buf(),
            text: text.to_string(),
            name: s.name.clone(),
            scenario_path,
            scenario_key: s.scenario.clone(),
            scenario_text,
            design,
            seed: s.seed.unwrap_or(0),
            seeds: s.seeds,
            samples,
            levels,
            second_order: s.second_order,
            outputs: if s.outputs.is_empty() {
                DEFAULT_OUTPUTS.iter().map(|s| s.to_string()).collect()
            } else {
                s.outputs.clone()
            },
            outputs_given: !s.outputs.is_empty(),
            bootstrap: bootstrap as usize,
            confidence,
            parameters,
        };
        if out.is_empty() {
            let n = spec.run_count();
            if n == 0 || n > MAX_RUNS {
                out.push(problem(
                    if design.sampled() { "sweep.samples" } else { "parameter" },
                    format!("{n} runs"),
                    format!("between 1 and {MAX_RUNS} runs"),
                ));
            }
        }
        let seed_given = s.seed.is_some();
        let mut spec = spec;
        if !seed_given {
            // The scenario's own seed, when it parses; the plan checks the scenario fully.
            spec.seed = toml::from_str::<Scenario>(&spec.scenario_text).map(|sc| sc.run.seed).unwrap_or(1);
        }
        Some(spec)
    }

    /// Number of runs of the design.
    pub fn run_count(&self) -> usize {
        let d = self.parameters.len();
        match self.design {
            Design::List => self.parameters.first().map_or(0, listed_len),
            Design::Grid => {
                self.parameters.iter().map(listed_len).try_fold(1usize, |a, n| a.checked_mul(n)).unwrap_or(usize::MAX)
            }
            Design::LatinHypercube => self.samples,
            Design::Morris => self.samples.saturating_mul(d + 1),
            Design::Saltelli => self.samples.saturating_mul(if self.second_order { 2 * d + 2 } else { d + 2 }),
        }
    }
}

fn listed_len(p: &Parameter) -> usize {
    match &p.values {
        Values::Listed(v) => v.len(),
        Values::Range { .. } => 0,
    }
}
