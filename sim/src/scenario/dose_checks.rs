//! Consistency checks of the dose schedules: the keys each kind of `[[particle.dose]]` takes,
//! doses inside the run, and totals that fit the exact 64-bit particle counts.

use super::sections::{DoseKind, DoseSection, Scenario};
use super::spec::Problem;

/// Largest total dose of one design, particles (exact counts are u64, below 1.8e19).
const MAX_TOTAL: f64 = 1.0e19;

/// Keys each kind of dose takes besides `kind` and `at_h`, the required ones first.
fn keys_of(kind: DoseKind) -> (&'static str, &'static [&'static str], &'static [&'static str]) {
    match kind {
        DoseKind::Bolus => ("bolus", &["particles"], &[]),
        DoseKind::Repeated => ("repeated", &["particles", "every_h", "count"], &[]),
        DoseKind::Infusion => ("infusion", &["duration_h"], &["particles", "particles_per_h"]),
    }
}

/// The optional keys of a dose entry that are given, with their values as written.
fn given(d: &DoseSection) -> Vec<(&'static str, String)> {
    let mut v = Vec::new();
    let mut add = |k: &'static str, x: Option<String>| {
        if let Some(x) = x {
            v.push((k, x));
        }
    };
    add("every_h", d.every_h.map(|x| x.to_string()));
    add("count", d.count.map(|x| x.to_string()));
    add("duration_h", d.duration_h.map(|x| x.to_string()));
    add("particles", d.particles.map(|x| x.to_string()));
    add("particles_per_h", d.particles_per_h.map(|x| x.to_string()));
    v
}

impl Scenario {
    pub(super) fn dose_consistency(&self, out: &mut Vec<Problem>) {
        let end = self.run.end_time_h;
        let mut push = |path: String, value: String, expected: String| {
            out.push(Problem { path, value, expected, line: None });
        };
        for (i, p) in self.particle.iter().enumerate() {
            if let (Some(x), false) = (p.dose_particles, p.dose.is_empty()) {
                push(
                    format!("particle[{i}].dose_particles"),
                    x.to_string(),
                    "either dose_particles (one bolus at t = 0) or [[particle.dose]] entries, not both".into(),
                );
            }
            let mut total = 0.0;
            for (j, d) in p.dose.iter().enumerate() {
                let path = |k: &str| format!("particle[{i}].dose[{j}].{k}");
                let (kind, required, optional) = keys_of(d.kind);
                let present = given(d);
                let mut ok = true;
                for (k, v) in &present {
                    if !required.contains(k) && !optional.contains(k) {
                        let all: Vec<&str> = ["kind", "at_h"].iter().chain(required).chain(optional).copied().collect();
                        push(path(k), v.clone(), format!("no {k} in a {kind} dose: its keys are {}", all.join(", ")));
                        ok = false;
                    }
                }
                for k in required {
                    if !present.iter().any(|(q, _)| q == k) {
                        push(path(k), "(missing)".into(), format!("{k}: a {kind} dose needs it"));
                        ok = false;
                    }
                }
                if d.kind == DoseKind::Infusion && (d.particles.is_some() == d.particles_per_h.is_some()) {
                    push(
                        path("particles"),
                        d.particles.map_or("(missing)".into(), |x| x.to_string()),
                        "an infusion takes either particles (its total) or particles_per_h, one of them".into(),
                    );
                    ok = false;
                }
                if !ok {
                    continue;
                }
                let (last, n) = match d.kind {
                    DoseKind::Bolus => (d.at_h, d.particles.unwrap_or(0.0)),
                    DoseKind::Repeated => {
                        let c = d.count.unwrap_or(1);
                        (
                            d.at_h + f64::from(c - 1) * d.every_h.unwrap_or(0.0),
                            f64::from(c) * d.particles.unwrap_or(0.0),
                        )
                    }
                    DoseKind::Infusion => {
                        let h = d.duration_h.unwrap_or(0.0);
                        (d.at_h + h, d.particles.unwrap_or_else(|| d.particles_per_h.unwrap_or(0.0) * h))
                    }
                };
                total += n;
                let within = if d.kind == DoseKind::Infusion { last <= end * (1.0 + 1e-12) } else { last < end };
                if !within {
                    let (key, what) = match d.kind {
                        DoseKind::Bolus => ("at_h", format!("a bolus time before run.end_time_h = {end}")),
                        DoseKind::Repeated => (
                            "count",
                            format!(
                                "repeated boluses that end before run.end_time_h = {end} (the last is at {last} h)"
                            ),
                        ),
                        DoseKind::Infusion => (
                            "duration_h",
                            format!("an infusion that ends by run.end_time_h = {end} (this one ends at {last} h)"),
                        ),
                    };
                    let value = match key {
                        "at_h" => d.at_h.to_string(),
                        "count" => d.count.unwrap_or(1).to_string(),
                        _ => d.duration_h.unwrap_or(0.0).to_string(),
                    };
                    push(path(key), value, what);
                }
            }
            if total > MAX_TOTAL {
                push(
                    format!("particle[{i}].dose"),
                    format!("{total:e} particles in all"),
                    format!("a schedule of at most {MAX_TOTAL:e} particles (exact 64-bit counts)"),
                );
            }
        }
    }
}
