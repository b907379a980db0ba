//! Unit conversions at the edges of the engine.
//!
//! Everything inside the engine is SI (m, s, kg, Pa, mol, K). Scenario keys carry their unit
//! in their name (`radius_nm`, `end_time_h`, `pressure_mmHg`) and are converted exactly once,
//! when the scenario is resolved into typed parameters.

/// Metres per micrometre.
pub const UM: f64 = 1e-6;
/// Metres per nanometre.
pub const NM: f64 = 1e-9;
/// Metres per centimetre.
pub const CM: f64 = 1e-2;
/// Seconds per minute.
pub const MIN: f64 = 60.0;
/// Seconds per hour.
pub const HOUR: f64 = 3600.0;
/// Seconds per day.
pub const DAY: f64 = 86400.0;
/// Pascal per millimetre of mercury (conventional value, 133.322387415 Pa; BIPM SI brochure).
pub const MMHG: f64 = 133.322_387_415;
/// Boltzmann constant, J/K (exact in the 2019 SI).
pub const K_B: f64 = 1.380_649e-23;
/// Avogadro constant, 1/mol (exact in the 2019 SI).
pub const N_A: f64 = 6.022_140_76e23;
/// Kelvin at 0 degrees Celsius.
pub const ZERO_CELSIUS: f64 = 273.15;
/// Cubic metres per litre.
pub const LITRE: f64 = 1e-3;
/// Cubic metres per millilitre.
pub const ML: f64 = 1e-6;

/// Converts a hydraulic conductivity given in cm^2/(mmHg s) into m^2/(Pa s).
pub fn cm2_per_mmhg_s(v: f64) -> f64 {
    v * CM * CM / MMHG
}

/// Converts a wall hydraulic conductivity given in cm/(mmHg s) into m/(Pa s).
pub fn cm_per_mmhg_s(v: f64) -> f64 {
    v * CM / MMHG
}

/// Converts a rate per unit pressure given in 1/(mmHg s) into 1/(Pa s).
pub fn per_mmhg_s(v: f64) -> f64 {
    v / MMHG
}

/// Converts a second-order rate constant given in 1/(M s) into m^3/s per pair of molecules.
pub fn per_molar_s_to_m3_per_s(kon: f64) -> f64 {
    kon / (N_A / LITRE)
}

/// Converts a molar concentration (mol/L) into molecules per cubic metre.
pub fn molar_to_per_m3(c: f64) -> f64 {
    c * N_A / LITRE
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn conversions_match_definitions() {
        // Conventional mmHg: mercury density 13595.1 kg/m^3 times standard gravity 9.80665 m/s^2
        // times 1 mm (BIPM SI brochure, table of non-SI units); within 2e-7 of the torr.
        assert!((MMHG - 13_595.1 * 9.806_65 * 1e-3).abs() < 1e-9);
        assert!((MMHG - 101_325.0 / 760.0).abs() / MMHG < 2e-7);
        // K from the Baxter and Jain 1989 set: 4.13e-8 cm^2/(mmHg s) = 3.098e-14 m^2/(Pa s).
        assert!((cm2_per_mmhg_s(4.13e-8) - 3.0978e-14).abs() / 3.0978e-14 < 1e-3);
        // 1 nM is 6.022e14 molecules per litre, 6.022e17 per m^3.
        assert!((molar_to_per_m3(1e-9) / 6.022_140_76e17 - 1.0).abs() < 1e-12);
    }
}
