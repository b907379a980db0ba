//! What a run file records about the software that wrote it.

/// Version of the engine.
pub const VERSION: &str = env!("CARGO_PKG_VERSION");
/// Git commit the engine was built from (`-dirty` when the tree had uncommitted changes).
pub const GIT_COMMIT: &str = env!("INTERSTICE_GIT_COMMIT");
/// Compiler that built the engine.
pub const RUSTC: &str = env!("INTERSTICE_RUSTC");
/// Cargo profile of the build.
pub const PROFILE: &str = env!("INTERSTICE_PROFILE");

/// The caution carried by the README, the run files and every report.
pub const CAUTION: &str = "Results are model predictions for research use only, not for clinical decisions. \
Any use involving animals or people is governed by local regulations and licensed practice.";

/// One line with version, commit, compiler and profile.
pub fn build_line() -> String {
    format!("interstice {VERSION} (commit {GIT_COMMIT}, {RUSTC}, profile {PROFILE})")
}
