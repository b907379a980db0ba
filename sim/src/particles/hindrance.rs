//! Hindered diffusion of a sphere in a fibre matrix, and the permeability of the matrix.

/// Stokes-Einstein diffusion coefficient of a sphere of hydrodynamic radius `r` (m) in a fluid of
/// viscosity `mu` (Pa s) at temperature `t` (K): `D0 = kB T / (6 pi mu r)` (Einstein 1905;
/// Sutherland 1905), m^2/s.
pub fn stokes_einstein(r: f64, mu: f64, t: f64) -> f64 {
    crate::units::K_B * t / (6.0 * std::f64::consts::PI * mu * r)
}

/// Steric hindrance of diffusion in a random array of fibres of radius `rf` at volume fraction
/// `phi`: `D/D0 = exp(-sqrt(phi) (rs + rf) / rf)` (Ogston, Preston and Wells 1973, Proc R Soc
/// Lond A 333:297).
pub fn ogston_diffusion(rs: f64, rf: f64, phi: f64) -> f64 {
    if phi <= 0.0 { 1.0 } else { (-(phi.sqrt()) * (rs + rf) / rf).exp() }
}

/// Equilibrium partition coefficient of a sphere into a random fibre array (the fraction of the
/// fluid it can reach): `Phi = exp(-phi (1 + rs/rf)^2)` (Ogston 1958, Trans Faraday Soc 54:1754).
pub fn ogston_partition(rs: f64, rf: f64, phi: f64) -> f64 {
    if phi <= 0.0 { 1.0 } else { (-phi * (1.0 + rs / rf).powi(2)).exp() }
}

/// Hydrodynamic hindrance of a sphere of radius `rs` in a Brinkman medium of Darcy permeability
/// `kappa` (m^2): `D/D0 = 1 / (1 + rs/sqrt(kappa) + rs^2 / (3 kappa))` (Phillips, Deen and Brady
/// 1989, AIChE J 35:1761).
pub fn brinkman_diffusion(rs: f64, kappa: f64) -> f64 {
    if !kappa.is_finite() || kappa <= 0.0 {
        return if kappa.is_infinite() { 1.0 } else { 0.0 };
    }
    let a = rs / kappa.sqrt();
    1.0 / (1.0 + a + a * a / 3.0)
}

/// Darcy permeability of a random three-dimensional array of fibres of radius `a` (m) at volume
/// fraction `phi`: `kappa = a^2 3 / (20 phi) (-ln(phi) - 0.931)` (Jackson and James 1986, Can J
/// Chem Eng 64:364), m^2. Valid for dilute arrays (`phi` well below 0.4, where the bracket stays
/// positive); the result is clamped at zero above.
pub fn jackson_james(a: f64, phi: f64) -> f64 {
    if phi <= 0.0 {
        return f64::INFINITY;
    }
    (a * a * 3.0 / (20.0 * phi) * (-phi.ln() - 0.931)).max(0.0)
}

/// Permeability of a matrix of two fibre populations whose hydraulic resistances add:
/// `1/kappa = 1/kappa_1 + 1/kappa_2` (each population's drag on the fluid adds; a common
/// mixture rule, common practice, and the model's choice).
pub fn mixed_permeability(k1: f64, k2: f64) -> f64 {
    match (k1.is_finite(), k2.is_finite()) {
        (false, false) => f64::INFINITY,
        (true, false) => k1,
        (false, true) => k2,
        (true, true) => {
            if k1 <= 0.0 || k2 <= 0.0 {
                0.0
            } else {
                1.0 / (1.0 / k1 + 1.0 / k2)
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn stokes_einstein_matches_the_reference_sheet_values() {
        // kB T / (6 pi mu r) with mu = 0.6913 mPa s at 310.15 K: 5 nm gives 6.57e-7 cm^2/s
        // (transport-physics reference, section 1, computed from the exact kB).
        let d = stokes_einstein(5e-9, 0.6913e-3, 310.15);
        assert!((d / 6.574e-11 - 1.0).abs() < 1e-3, "{d}");
        assert!((stokes_einstein(50e-9, 0.6913e-3, 310.15) * 10.0 / d - 1.0).abs() < 1e-12);
    }

    #[test]
    fn hindrance_limits_and_monotonicity() {
        assert_eq!(ogston_diffusion(5e-9, 1e-9, 0.0), 1.0);
        assert_eq!(brinkman_diffusion(5e-9, f64::INFINITY), 1.0);
        let mut last = 1.0;
        for i in 1..50 {
            let phi = i as f64 * 0.005;
            let v = ogston_diffusion(10e-9, 20e-9, phi) * ogston_partition(10e-9, 20e-9, phi);
            assert!(v < last && v > 0.0);
            last = v;
        }
        // Brinkman: hindrance 1/(1 + 1 + 1/3) when rs = sqrt(kappa).
        assert!((brinkman_diffusion(3e-9, 9e-18) - 3.0 / 7.0).abs() < 1e-12);
    }

    #[test]
    fn jackson_james_worked_value() {
        // phi = 0.1: 3/(20*0.1) * (ln 10 - 0.931) = 1.5 * 1.371585 = 2.0574 (by hand).
        let k = jackson_james(1.0, 0.1);
        assert!((k - 1.5 * (10f64.ln() - 0.931)).abs() < 1e-12);
        assert!((mixed_permeability(2.0, 2.0) - 1.0).abs() < 1e-15);
        assert_eq!(mixed_permeability(3.0, f64::INFINITY), 3.0);
    }
}
