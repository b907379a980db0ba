//! The growth phase's diffusing angiogenic signal (`growth.angiogenic_signal = "diffusing"`):
//! hypoxic cells make perfused vessels sprout where the signal is strong enough.

use std::path::Path;

use interstice_sim::vessels::network::Network;
use interstice_sim::{LoadedScenario, Simulation};

fn sim(text: &str) -> Simulation {
    let loaded = LoadedScenario::from_text(Path::new("grow.toml"), text.to_string()).unwrap();
    Simulation::new(&loaded).unwrap()
}

/// A hungry tumour fed by a network, grown for a day with frequent sprouting.
fn grown(extra: &str) -> String {
    format!(
        r#"
[run]
end_time_h = 0.5
time_step_s = 60.0
snapshot_interval_h = 0.5
[lattice]
shape = [24, 24, 24]
voxel_um = 20.0
[tumour]
radius_um = 170.0
[vessels]
model = "network"
[vessels.network]
necrotic_core_fraction = 0.7
[oxygen]
max_consumption_mmHg_per_s = 40.0
[growth]
enabled = true
duration_d = 1.0
time_step_h = 3.0
snapshot_interval_h = 12.0
sprout_rate_per_h = 0.5
angiogenic_signal = "diffusing"
{extra}
"#
    )
}

/// Segments laid by sprouts (immature tumour vessels of maturity 0.1).
fn sprouted(s: &Simulation) -> usize {
    s.world.resource::<Network>().segments.iter().filter(|g| g.maturity == 0.1).count()
}

#[test]
fn a_diffusing_signal_makes_vessels_sprout_only_where_it_is_strong_enough() {
    let on = sim(&grown(""));
    assert!(sprouted(&on) > 0, "no sprouts with the diffusing signal");
    // A threshold of 1 (the level deep inside a large hypoxic region) lets no segment sprout.
    let off = sim(&grown("signal_sprout_threshold = 1.0\n"));
    assert_eq!(sprouted(&off), 0);
}
