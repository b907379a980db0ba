//! Scenario files: TOML read with serde, every quantity's unit in its key, every value checked.
//!
//! A scenario is read in three passes: TOML syntax, the typed structure (unknown keys are
//! rejected, with a hint when only the unit suffix is wrong), then value checks (ranges from
//! [`spec`], and consistency between sections). Every problem names the file, the key path, the
//! value, what was expected and the line.

mod dose_checks;
mod intervention_sections;
mod sections;
pub mod spans;
pub mod spec;
mod tissue_sections;
mod transport_sections;
mod vessel_checks;

use std::fmt;
use std::path::{Path, PathBuf};

pub use intervention_sections::*;
pub use sections::*;
use spans::SpanIndex;
pub use spec::{Check, KeySpec, Problem, Section, SectionDoc};
pub use tissue_sections::*;
pub use transport_sections::*;
pub use vessel_checks::scenario_relative;

/// Why a scenario could not be used.
#[derive(Debug, Clone, thiserror::Error)]
pub enum ScenarioError {
    #[error("{file}: cannot read the scenario: {reason}")]
    Read { file: PathBuf, reason: String },
    #[error("{}", render(file, problems))]
    Invalid { file: PathBuf, problems: Vec<Problem> },
}

fn render(file: &Path, problems: &[Problem]) -> String {
    let mut s = String::new();
    let n = problems.len();
    if n > 1 {
        s.push_str(&format!("{}: {n} problems in the scenario\n", file.display()));
    }
    for (i, p) in problems.iter().enumerate() {
        if i > 0 {
            s.push('\n');
        }
        s.push_str(&format!("{}", file.display()));
        if let Some(l) = p.line {
            s.push_str(&format!(":{l}"));
        }
        s.push_str(&format!(": `{}`", p.path));
        if !p.value.is_empty() {
            s.push_str(&format!(" = {}", p.value));
        }
        s.push_str(&format!(": expected {}", p.expected));
    }
    s
}

impl ScenarioError {
    /// The problems found (empty for a read failure).
    pub fn problems(&self) -> &[Problem] {
        match self {
            ScenarioError::Read { .. } => &[],
            ScenarioError::Invalid { problems, .. } => problems,
        }
    }
}

/// Unit suffixes a key may end with; used to explain a key whose unit is wrong.
const UNIT_SUFFIXES: &[&str] = &[
    "nm",
    "um",
    "mm",
    "cm",
    "m",
    "s",
    "min",
    "h",
    "d",
    "mmHg",
    "Pa",
    "kPa",
    "per_s",
    "per_h",
    "per_min",
    "nM",
    "uM",
    "mM",
    "M",
    "per_M_s",
    "cm2_per_s",
    "um2_per_s",
    "m2_per_s",
    "mPa_s",
    "C",
    "K",
    "mV",
    "mL",
    "g_per_mL",
    "cm_per_s",
    "cm_per_mmHg_s",
    "cm2_per_mmHg_s",
    "per_cm",
    "per_mmHg_s",
    "per_cell",
    "um3",
    "particles",
    "per_day",
    "mmHg_per_s",
    "percent",
    "um_per_s",
];

fn stem(key: &str) -> &str {
    let mut best = key;
    for suf in UNIT_SUFFIXES {
        if let Some(s) = key.strip_suffix(suf)
            && let Some(s) = s.strip_suffix('_')
            && s.len() < best.len()
        {
            best = s;
        }
    }
    best
}

fn backticked(msg: &str) -> Vec<&str> {
    msg.split('`').skip(1).step_by(2).collect()
}

/// Explains a serde error from the typed pass.
fn explain(msg: &str) -> (String, String) {
    if let Some(rest) = msg.strip_prefix("unknown field ") {
        let names = backticked(rest);
        if let Some((bad, known)) = names.split_first() {
            let s = stem(bad);
            if let Some(k) = known.iter().find(|k| stem(k) == s && **k != *bad && s != *bad) {
                return (
                    format!("key `{bad}`"),
                    format!(
                        "the key `{k}`: this quantity is given in the unit its name ends with ({})",
                        &k[s.len() + 1..]
                    ),
                );
            }
            let list =
                if known.is_empty() { "no keys here".to_string() } else { format!("one of {}", known.join(", ")) };
            return (format!("unknown key `{bad}`"), list);
        }
    }
    if let Some(rest) = msg.strip_prefix("unknown variant ") {
        let names = backticked(rest);
        if let Some((bad, known)) = names.split_first() {
            return (format!("\"{bad}\""), format!("one of \"{}\"", known.join("\", \"")));
        }
    }
    if let Some(rest) = msg.strip_prefix("invalid type: ")
        && let Some((found, expected)) = rest.split_once(", expected ")
    {
        return (found.to_string(), expected.to_string());
    }
    if let Some(rest) = msg.strip_prefix("invalid value: ")
        && let Some((found, expected)) = rest.split_once(", expected ")
    {
        return (found.to_string(), expected.to_string());
    }
    (String::new(), msg.trim().to_string())
}

/// A scenario as written, with the file it came from and its text.
#[derive(Debug, Clone)]
pub struct LoadedScenario {
    pub file: PathBuf,
    pub text: String,
    pub scenario: Scenario,
}

impl LoadedScenario {
    /// Reads, parses and validates a scenario file.
    pub fn from_file(path: &Path) -> Result<Self, ScenarioError> {
        let text = std::fs::read_to_string(path)
            .map_err(|e| ScenarioError::Read { file: path.to_path_buf(), reason: e.to_string() })?;
        Self::from_text(path, text)
    }

    /// Parses and validates scenario text; `file` is only used in messages.
    pub fn from_text(file: &Path, text: String) -> Result<Self, ScenarioError> {
        let idx = SpanIndex::new(&text);
        let scenario: Scenario = match toml::from_str(&text) {
            Ok(s) => s,
            Err(e) => {
                let span = e.span();
                let path = span.as_ref().and_then(|s| idx.path_at(s)).unwrap_or_default();
                let line = span.map(|s| idx.line_of(s.start));
                let (value, expected) = explain(e.message());
                let value = if value.is_empty() && !path.is_empty() {
                    idx.raw_value(&text, &path).unwrap_or("").to_string()
                } else {
                    value
                };
                return Err(ScenarioError::Invalid {
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
        let mut problems = scenario.problems(Some(file));
        for p in &mut problems {
            p.line = idx.line_of_path(&p.path);
        }
        if problems.is_empty() {
            Ok(LoadedScenario { file: file.to_path_buf(), text, scenario })
        } else {
            Err(ScenarioError::Invalid { file: file.to_path_buf(), problems })
        }
    }
}

/// Renders every section's keys with defaults, units and allowed values: the one table of defaults.
pub fn defaults_table() -> String {
    let mut out = String::new();
    let sections = Scenario::sections();
    for sec in &sections {
        let header = if sec.name.starts_with("[[") { sec.name.to_string() } else { format!("[{}]", sec.name) };
        out.push_str(&format!("{header}  # {}\n", sec.summary.trim()));
        for k in &sec.keys {
            let value = sec.defaults.get(k.key);
            let nested = format!("{}.{}", sec.name.trim_matches(['[', ']']), k.key);
            if let Some(toml::Value::Table(_)) = value {
                out.push_str(&format!("# {}: see [{nested}]\n", k.key));
                continue;
            }
            // An array of tables documented as its own section (`[[particle.dose]]`).
            if sections.iter().any(|s| s.name == format!("[[{nested}]]")) {
                out.push_str(&format!("# {}: see [[{nested}]] (none by default)\n", k.key));
                continue;
            }
            match value {
                Some(v) => out.push_str(&format!("{} = {v}", k.key)),
                None => out.push_str(&format!("# {} = (not set)", k.key)),
            }
            if let Some(c) = &k.check {
                out.push_str(&format!("    # {c}"));
            }
            out.push('\n');
            if !k.doc.trim().is_empty() {
                out.push_str(&format!("    # {}\n", k.doc.trim()));
            }
        }
        out.push('\n');
    }
    out
}

impl fmt::Display for Scenario {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let s = toml::to_string(self).map_err(|_| fmt::Error)?;
        f.write_str(&s)
    }
}

#[cfg(test)]
mod tests;
