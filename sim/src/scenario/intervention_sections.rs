//! Scenario sections of scheduled interventions: `[[intervention]]` tables, each with exactly one
//! sub-table naming what it does.

use serde::{Deserialize, Serialize};

use super::spec::{Check, Problem, checked_plain, section};
use super::{ParticleSection, Scenario};

/// Where an intervention acts.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum InterventionRegion {
    /// Every voxel and vessel.
    All,
    /// The tumour.
    Tumour,
    /// The host tissue.
    Host,
    /// A sphere: `region_centre_um` (default: the tumour centre) and `region_radius_um`.
    Sphere,
}
checked_plain!(InterventionRegion);

/// Which matrix fibres an enzyme degrades.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum MatrixFibre {
    /// Collagen fibres (a collagenase).
    Collagen,
    /// Glycosaminoglycan chains (a hyaluronidase).
    Gag,
}
checked_plain!(MatrixFibre);

/// A value of any scenario key (number, text, flag), for `[intervention.set]`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(transparent)]
pub struct AnyValue(pub toml::Value);
checked_plain!(AnyValue);

section! {
    /// Matrix degradation by an enzyme: the fibre volume fraction decays as `phi(t) = phi_0
    /// exp(-k I(t))`, with `I(t)` the integral of the enzyme's activity, which decays with its
    /// half-life from the start and stops at the end of the treatment.
    pub struct DegradationSection {
        /// Fibres the enzyme cuts: "collagen" or "gag".
        fibre: MatrixFibre = MatrixFibre::Collagen;
        /// First-order degradation rate at full enzyme activity (k_cat E_0 / K_m), 1/h.
        rate_per_h: f64 = 0.5, Check::closed(0.0, 100.0);
        /// Half-life of the enzyme's activity in tissue, hours.
        enzyme_half_life_h: f64 = 4.0, Check::closed(0.01, 1.0e4);
        /// Interval between updates of the matrix and of what depends on it, minutes.
        update_interval_min: f64 = 15.0, Check::closed(0.1, 1.0e4);
    }
}

section! {
    /// Vessel normalisation: pore radii of the vessels in the region relax toward a normal value,
    /// the wall conductivity follows from the pores, and immature vessels close (network vessels
    /// only: continuum vessels have no maturity); blood flow, pressure and wall exchange are
    /// re-solved.
    pub struct NormalisationSection {
        /// Pore radius the walls relax toward, nm.
        normal_pore_radius_nm: f64 = 20.0, Check::closed(0.5, 5000.0);
        /// Time constant of the relaxation, hours.
        time_constant_h: f64 = 24.0, Check::closed(0.01, 1.0e4);
        /// Vessels whose maturity is below this close (are pruned) at the start (network vessels).
        prune_maturity_below: f64 = 0.0, Check::fraction();
        /// Interval between updates, minutes.
        update_interval_min: f64 = 60.0, Check::closed(0.1, 1.0e4);
    }
}

section! {
    /// Mild hyperthermia: during heating the pores of the vessels in the region widen by
    /// `pore_factor` and their blood flow rises by `flow_factor` through vasodilation (lumen
    /// radius times `flow_factor^(1/4)`, Poiseuille; network vessels: continuum vessels carry no
    /// modelled flow); afterwards both relax back with `relax_time_h`.
    pub struct HeatingSection {
        /// Factor on the pore radius at full heat.
        pore_factor: f64 = 1.5, Check::closed(0.1, 10.0);
        /// Factor on blood flow at full heat (network vessels).
        flow_factor: f64 = 2.0, Check::closed(0.1, 10.0);
        /// Time constant of the return after heating ends, hours.
        relax_time_h: f64 = 0.5, Check::closed(0.001, 1.0e3);
        /// Interval between updates, minutes.
        update_interval_min: f64 = 10.0, Check::closed(0.1, 1.0e4);
    }
}

section! {
    /// A tissue-penetrating peptide given with a particle design: while it acts, an active route
    /// multiplies the design's wall permeability in the region and its diffusion through voxels
    /// whose cell expresses the targeted receptor.
    pub struct PeptideSection {
        /// Name of the particle design that carries the peptide.
        particle: String = String::new();
        /// Factor on the wall permeability of that design.
        wall_factor: f64 = 3.0, Check::closed(1.0, 1000.0);
        /// Factor on its diffusion coefficient in receptor-expressing voxels.
        tissue_factor: f64 = 2.0, Check::closed(1.0, 100.0);
    }
}

section! {
    /// Sets a scenario key to a new value from the start time on (a kinetic or pharmacokinetic
    /// parameter: `particle[i].ligand.*`, `particle[i].plasma.*`, `particle[i].coating`,
    /// `particle[i].surface_potential_mV`, `particle[i].convective_hindrance`, `binding.*`,
    /// `uptake.*`). The changed scenario is validated like the file itself.
    pub struct SetSection {
        /// Dotted key path as error messages write it, e.g. "particle[0].ligand.koff_per_s".
        key: String = String::new();
        /// The new value, in the key's own unit.
        value: AnyValue = AnyValue(toml::Value::Float(0.0));
    }
}

section! {
    /// One scheduled intervention: when, where, and one sub-table saying what it does
    /// (`matrix_degradation`, `normalisation`, `heating`, `peptide` or `set`).
    pub struct InterventionSection {
        /// Label in the timeline and the series (letters, digits, '-', '_').
        name: String = "intervention".to_string();
        /// Whether it takes place (false: checked, then left out; for controls).
        enabled: bool = true;
        /// Start, hours after the first dose (t = 0).
        start_h: f64 = 0.0, Check::closed(0.0, 1.0e6);
        /// How long it acts, hours (0: until the end of the run).
        duration_h: f64 = 0.0, Check::closed(0.0, 1.0e6);
        /// Where it acts: "all", "tumour", "host" or "sphere".
        region: InterventionRegion = InterventionRegion::Tumour;
        /// Centre of a spherical region, um (default: the tumour's centre).
        region_centre_um: Option<[f64; 3]> = None, Check::finite();
        /// Radius of a spherical region, um.
        region_radius_um: f64 = 100.0, Check::positive();
        /// Enzymatic matrix degradation.
        matrix_degradation: Option<DegradationSection> = None;
        /// Vessel normalisation.
        normalisation: Option<NormalisationSection> = None;
        /// Mild hyperthermia.
        heating: Option<HeatingSection> = None;
        /// A tissue-penetrating peptide.
        peptide: Option<PeptideSection> = None;
        /// A scheduled change of one scenario key.
        set: Option<SetSection> = None;
    }
}

/// Key paths a `set` intervention may change: kinetic and pharmacokinetic parameters whose new
/// value the processes take up mid-run. Structural keys (lattice, tumour, vessels, cells, dose,
/// particle size) describe the state and cannot change on a schedule.
pub const SETTABLE: &[&str] = &[
    "particle[*].ligand.",
    "particle[*].plasma.",
    "particle[*].coating",
    "particle[*].surface_potential_mV",
    "particle[*].convective_hindrance",
    "binding.",
    "uptake.",
];

/// Whether `key` may be changed by a `set` intervention.
pub fn settable(key: &str) -> bool {
    let generic = generic_path(key);
    SETTABLE.iter().any(|p| if p.ends_with('.') { generic.starts_with(p) } else { generic == *p })
}

/// `particle[3].ligand.x` -> `particle[*].ligand.x`.
fn generic_path(key: &str) -> String {
    let mut out = String::new();
    let mut in_index = false;
    for c in key.chars() {
        match c {
            '[' => {
                in_index = true;
                out.push_str("[*");
            }
            ']' => {
                in_index = false;
                out.push(']');
            }
            _ if in_index => {}
            _ => out.push(c),
        }
    }
    out
}

/// Splits `a.b[2].c` into steps: `("a", None), ("b", Some(2)), ("c", None)`.
fn steps(key: &str) -> Option<Vec<(String, Option<usize>)>> {
    key.split('.')
        .map(|part| match part.split_once('[') {
            Some((name, rest)) => {
                let i = rest.strip_suffix(']')?.parse().ok()?;
                Some((name.to_string(), Some(i)))
            }
            None => Some((part.to_string(), None)),
        })
        .collect()
}

/// The scenario with `key` set to `value`, through its TOML form: the result is checked like a
/// file (unknown keys, types, then ranges). Errors are worded for `[intervention.set]`.
pub fn with_key(s: &Scenario, key: &str, value: &toml::Value) -> Result<Scenario, String> {
    let mut base = s.clone();
    base.intervention.clear();
    let mut tree = toml::Value::try_from(&base).map_err(|e| e.to_string())?;
    let path = steps(key).ok_or_else(|| format!("a key path like \"particle[0].ligand.koff_per_s\", not {key:?}"))?;
    let mut node = &mut tree;
    for (depth, (name, index)) in path.iter().enumerate() {
        let last = depth + 1 == path.len();
        let table = node.as_table_mut().ok_or_else(|| format!("{key:?} does not name a key of the scenario"))?;
        if last && index.is_none() {
            if !table.contains_key(name) {
                return Err(format!("{key:?} does not name a key of the scenario (or its table is absent)"));
            }
            table.insert(name.clone(), value.clone());
            break;
        }
        let child = table.get_mut(name).ok_or_else(|| format!("{key:?}: the scenario has no table `{name}`"))?;
        node = match index {
            Some(i) => child
                .as_array_mut()
                .and_then(|a| a.get_mut(*i))
                .ok_or_else(|| format!("{key:?}: `{name}` has no entry {i}"))?,
            None => child,
        };
    }
    // Integers given where the key is a float, and the reverse, are both accepted by TOML readers.
    let text = toml::to_string(&tree).map_err(|e| e.to_string())?;
    toml::from_str::<Scenario>(&text).map_err(|e| format!("a value of the key's own type ({})", e.message()))
}

impl InterventionSection {
    /// The sub-tables present, by name.
    pub fn actions(&self) -> Vec<&'static str> {
        let mut a = Vec::new();
        if self.matrix_degradation.is_some() {
            a.push("matrix_degradation");
        }
        if self.normalisation.is_some() {
            a.push("normalisation");
        }
        if self.heating.is_some() {
            a.push("heating");
        }
        if self.peptide.is_some() {
            a.push("peptide");
        }
        if self.set.is_some() {
            a.push("set");
        }
        a
    }
}

/// Why a `set` cannot apply: the sub-key to blame (`key` or `value`) and what it expects.
pub type SetProblem = (&'static str, String);

/// The scenario in force from the start of each `set` intervention, by intervention (None for
/// other actions): the file's scenario without its interventions, with every enabled `set` that
/// starts earlier (or at the same time and earlier in the file) applied in start order. Checking
/// and resolution both read it, so they see the same sequence of changes.
pub fn set_scenarios(s: &Scenario) -> Vec<Option<Result<Scenario, SetProblem>>> {
    let mut current = s.clone();
    current.intervention.clear();
    let mut order: Vec<usize> = (0..s.intervention.len()).collect();
    order.sort_by(|&a, &b| s.intervention[a].start_h.total_cmp(&s.intervention[b].start_h));
    let mut out = vec![None; s.intervention.len()];
    for i in order {
        let iv = &s.intervention[i];
        let Some(set) = &iv.set else { continue };
        let result = if !settable(&set.key) {
            Err(("key", format!("a key that may change during a run: {}", SETTABLE.join(", "))))
        } else {
            with_key(&current, &set.key, &set.value.0).map_err(|why| ("value", why))
        };
        if let (Ok(next), true) = (&result, iv.enabled) {
            current = next.clone();
        }
        out[i] = Some(result);
    }
    out
}

/// Consistency of the `[[intervention]]` tables with each other and with the rest.
pub fn intervention_problems(s: &Scenario, out: &mut Vec<Problem>) {
    let mut names = std::collections::BTreeSet::new();
    let in_force = set_scenarios(s);
    for (i, iv) in s.intervention.iter().enumerate() {
        let path = format!("intervention[{i}]");
        let problem = |key: &str, value: String, expected: String| Problem {
            path: format!("{path}{key}"),
            value,
            expected,
            line: None,
        };
        if iv.name.is_empty() || !iv.name.chars().all(|c| c.is_ascii_alphanumeric() || "-_".contains(c)) {
            out.push(problem(".name", format!("{:?}", iv.name), "a name of letters, digits, '-' and '_'".into()));
        } else if !names.insert(iv.name.clone()) {
            out.push(problem(".name", format!("{:?}", iv.name), "a name no other intervention uses".into()));
        }
        let actions = iv.actions();
        if actions.len() != 1 {
            out.push(problem(
                "",
                format!("{} action table(s) {:?}", actions.len(), actions),
                "exactly one of the tables matrix_degradation, normalisation, heating, peptide, set".into(),
            ));
            continue;
        }
        if iv.start_h >= s.run.end_time_h {
            out.push(problem(
                ".start_h",
                iv.start_h.to_string(),
                format!("a start before the end of the run (run.end_time_h = {})", s.run.end_time_h),
            ));
        }
        let network = s.vessels.model == super::VesselModel::Network;
        if let Some(n) = &iv.normalisation
            && n.prune_maturity_below > 0.0
            && !network
        {
            out.push(problem(
                ".normalisation.prune_maturity_below",
                format!("{} with vessels.model = \"continuum\"", n.prune_maturity_below),
                "0 with continuum vessels (they have no maturity to prune by), or vessels.model = \"network\"".into(),
            ));
        }
        if iv.heating.is_some() && iv.duration_h <= 0.0 {
            out.push(problem(".duration_h", "0".into(), "a heating period > 0 hours".into()));
        }
        if let Some(p) = &iv.peptide
            && !s.particle.iter().any(|d: &ParticleSection| d.name == p.particle)
        {
            out.push(problem(
                ".peptide.particle",
                format!("{:?}", p.particle),
                format!("the name of a particle design: {:?}", s.particle.iter().map(|d| &d.name).collect::<Vec<_>>()),
            ));
        }
        if let (Some(set), Some(result)) = (&iv.set, &in_force[i]) {
            match result {
                Err((sub, why)) => {
                    let value = if *sub == "key" { format!("{:?}", set.key) } else { set.value.0.to_string() };
                    out.push(problem(&format!(".set.{sub}"), value, why.clone()));
                }
                Ok(next) => {
                    for p in next.problems(None) {
                        out.push(problem(
                            ".set.value",
                            set.value.0.to_string(),
                            format!("a valid value of `{}`: {}", p.path, p.expected),
                        ));
                    }
                }
            }
        }
    }
}
