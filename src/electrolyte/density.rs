//! Density of water and of aqueous sulfuric acid (Laliberté model), specific
//! gravity, and the conversions between mass fraction, molality and SG 25/25.
//!
//! Model: Laliberté & Cooper, J. Chem. Eng. Data 49, 1141 (2004), with the
//! H2SO4 coefficients and the water density of Laliberté, J. Chem. Eng. Data
//! 54, 1725 (2009) (REFERENCES §1.4). Published validity −11 to 75 °C and up to
//! 78 wt%.

use super::{
    bisect_increasing, check_sg, classify_temperature, finite, Checked, ElectrolyteError,
    H2SO4_MOLAR_MASS_G_PER_MOL,
};
use crate::units::{Celsius, KgPerM3, MassFraction, MolPerKg, SpecificGravity};

/// Lowest temperature of the Laliberté model's published range, °C.
pub const LALIBERTE_MIN_C: f64 = -11.0;
/// Highest temperature of the Laliberté model's published range, °C.
pub const LALIBERTE_MAX_C: f64 = 75.0;
/// Highest H2SO4 mass fraction of the Laliberté model's published range.
/// Mass fractions above it are refused everywhere in this module.
pub const LALIBERTE_MASS_FRACTION_MAX: f64 = 0.78;

/// The 25 °C at which SG 25/25 is defined.
const REFERENCE_C: f64 = 25.0;

// Laliberté (2009) H2SO4 apparent-density coefficients c0..c4.
const C0: f64 = 70.8395;
const C1: f64 = 142.3527;
const C2: f64 = 0.687795;
const C3: f64 = 0.006_493_00;
const C4: f64 = 1667.239;

/// Water density polynomial without range checks; callers check `t`.
pub(crate) fn water_density_raw(t: f64) -> f64 {
    let numerator = ((((-2.805_425_3e-10 * t + 1.055_630_2e-7) * t - 4.617_046_1e-5) * t
        - 0.007_987_040_1)
        * t
        + 16.945_176)
        * t
        + 999.839_52;
    numerator / (1.0 + 0.016_879_85 * t)
}

/// Solution density without range checks; callers check `w` and `t`.
pub(crate) fn solution_density_raw(w: f64, t: f64) -> f64 {
    let rho_w = water_density_raw(t);
    if w == 0.0 {
        // The mixing rule reduces to water exactly; skip the 0/ρ_app term.
        return rho_w;
    }
    let rho_app = (C0 * w + C1) * (1e-6 * (t + C4).powi(2)).exp() / (w + C2 + C3 * t);
    1.0 / ((1.0 - w) / rho_w + w / rho_app)
}

fn check_mass_fraction(w: MassFraction) -> Result<f64, ElectrolyteError> {
    if (0.0..=LALIBERTE_MASS_FRACTION_MAX).contains(&w.0) {
        Ok(w.0)
    } else {
        Err(ElectrolyteError::MassFractionOutOfRange {
            mass_fraction: w.0,
            min: 0.0,
            max: LALIBERTE_MASS_FRACTION_MAX,
        })
    }
}

fn laliberte_temperature(t: Celsius) -> Result<bool, ElectrolyteError> {
    classify_temperature(t.0, LALIBERTE_MIN_C, LALIBERTE_MAX_C)
}

/// Density of pure (air-free) water at `t`, from the Laliberté (2009) fit.
///
/// Plain inside −11..=75 °C (the fit is used with the acid model over that
/// range; below 0 °C it describes supercooled water); extrapolated down to
/// −40 °C and up to 70 °C is the crate-wide hard limit, so 70–75 °C is refused.
pub fn water_density(t: Celsius) -> Result<Checked<KgPerM3>, ElectrolyteError> {
    let extrapolated = laliberte_temperature(t)?;
    let rho = finite(water_density_raw(t.0), "water density")?;
    Ok(Checked {
        value: KgPerM3(rho),
        extrapolated,
    })
}

/// Density of aqueous sulfuric acid of mass fraction `w` at `t` (Laliberté
/// model): 1/ρ = (1 − w)/ρ_w + w/ρ_app.
///
/// `w` must lie in 0..=0.78; temperatures as for [`water_density`].
pub fn solution_density(w: MassFraction, t: Celsius) -> Result<Checked<KgPerM3>, ElectrolyteError> {
    let w = check_mass_fraction(w)?;
    let extrapolated = laliberte_temperature(t)?;
    let rho = finite(solution_density_raw(w, t.0), "solution density")?;
    Ok(Checked {
        value: KgPerM3(rho),
        extrapolated,
    })
}

/// SG of solution at t_solution referred to water at t_water: ρ(w, t_solution) / ρ_water(t_water).
///
/// `specific_gravity(w, 25 °C, 25 °C)` is the SG 25/25 used everywhere else.
/// Extrapolated when either temperature is outside −11..=75 °C.
pub fn specific_gravity(
    w: MassFraction,
    t_solution: Celsius,
    t_water: Celsius,
) -> Result<Checked<SpecificGravity>, ElectrolyteError> {
    let rho = solution_density(w, t_solution)?;
    let rho_w = water_density(t_water)?;
    let sg = finite(rho.value.0 / rho_w.value.0, "specific gravity")?;
    Ok(Checked {
        value: SpecificGravity(sg),
        extrapolated: rho.extrapolated || rho_w.extrapolated,
    })
}

/// SG 25/25 (solution at 25 °C over water at 25 °C) of acid of mass fraction `w` (0..=0.78).
pub fn sg25_from_mass_fraction(w: MassFraction) -> Result<SpecificGravity, ElectrolyteError> {
    let w = check_mass_fraction(w)?;
    let sg = solution_density_raw(w, REFERENCE_C) / water_density_raw(REFERENCE_C);
    Ok(SpecificGravity(finite(sg, "SG 25/25")?))
}

/// Mass fraction of H2SO4 whose SG 25/25 is `sg` (1.000..=1.400), by bisection
/// of [`sg25_from_mass_fraction`] to better than 1e-9 in mass fraction.
///
/// SG 25/25 rises monotonically with w over the model's range, so the root is unique.
pub fn mass_fraction_from_sg25(sg: SpecificGravity) -> Result<MassFraction, ElectrolyteError> {
    let target = check_sg(sg)?;
    let w = bisect_increasing(
        |w| sg25_from_mass_fraction(MassFraction(w)).map(|s| s.0),
        target,
        0.0,
        LALIBERTE_MASS_FRACTION_MAX,
        1e-12,
    )?;
    Ok(MassFraction(w))
}

fn molality_max_mol_per_kg() -> f64 {
    molality_raw(LALIBERTE_MASS_FRACTION_MAX)
}

fn molality_raw(w: f64) -> f64 {
    1000.0 * w / (H2SO4_MOLAR_MASS_G_PER_MOL * (1.0 - w))
}

/// Molality (mol H2SO4 per kg water) of acid of mass fraction `w` (0..=0.78):
/// m = 1000·w / (M·(1 − w)), M = 98.079 g/mol.
pub fn molality_from_mass_fraction(w: MassFraction) -> Result<MolPerKg, ElectrolyteError> {
    let w = check_mass_fraction(w)?;
    Ok(MolPerKg(finite(molality_raw(w), "molality")?))
}

/// Mass fraction of acid of molality `m`; the inverse of
/// [`molality_from_mass_fraction`], accepting 0 up to the molality of 78 wt% (about 36 mol/kg).
pub fn mass_fraction_from_molality(m: MolPerKg) -> Result<MassFraction, ElectrolyteError> {
    let max = molality_max_mol_per_kg();
    if !(0.0..=max).contains(&m.0) {
        return Err(ElectrolyteError::MolalityOutOfRange {
            mol_per_kg: m.0,
            min: 0.0,
            max,
        });
    }
    let solute_g = m.0 * H2SO4_MOLAR_MASS_G_PER_MOL;
    Ok(MassFraction(finite(
        solute_g / (solute_g + 1000.0),
        "mass fraction",
    )?))
}

/// Molality of acid whose SG 25/25 is `sg` (1.000..=1.400), via the Laliberté model.
pub fn molality_from_sg25(sg: SpecificGravity) -> Result<MolPerKg, ElectrolyteError> {
    molality_from_mass_fraction(mass_fraction_from_sg25(sg)?)
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

    // (wt%, ρ 20 °C, ρ 25 °C, SG 25/25): REFERENCES §1.4 check table (derived
    // from the Laliberté model, 0.1 kg/m³).
    const CHECK: [(f64, f64, f64, f64); 5] = [
        (10.0, 1066.9, 1065.0, 1.0682),
        (20.0, 1140.4, 1137.7, 1.1411),
        (30.0, 1219.2, 1215.9, 1.2195),
        (37.0, 1278.1, 1274.4, 1.2782),
        (40.0, 1304.3, 1300.5, 1.3044),
    ];

    #[test]
    fn density_matches_check_table() {
        for (wt, rho20, rho25, sg25) in CHECK {
            let w = MassFraction(wt / 100.0);
            let d20 = solution_density(w, Celsius(20.0)).unwrap();
            let d25 = solution_density(w, Celsius(25.0)).unwrap();
            // derived (REFERENCES §1.4), 0.1 kg/m³ (table is rounded to 0.1, so allow the half-step).
            assert_abs_diff_eq!(d20.value.0, rho20, epsilon = 0.1);
            assert_abs_diff_eq!(d25.value.0, rho25, epsilon = 0.1);
            assert!(!d20.extrapolated && !d25.extrapolated);
            // derived (REFERENCES §1.4 SG 25/25 column, 4 decimals).
            assert_abs_diff_eq!(
                sg25_from_mass_fraction(w).unwrap().0,
                sg25,
                epsilon = 0.00006
            );
        }
    }

    #[test]
    fn density_agrees_with_crc_at_20c() {
        // from memory: CRC Handbook concentrative properties, 20 °C (REFERENCES §1.4), 2 kg/m³.
        for (wt, crc_sg) in [
            (10.0, 1.0661),
            (20.0, 1.1394),
            (30.0, 1.2185),
            (40.0, 1.3028),
        ] {
            let d = solution_density(MassFraction(wt / 100.0), Celsius(20.0)).unwrap();
            assert_abs_diff_eq!(d.value.0, crc_sg * 1000.0, epsilon = 2.0);
        }
    }

    #[test]
    fn water_density_at_reference_points() {
        // from memory: pure water 998.2 kg/m³ at 20 °C, 997.05 at 25 °C, 999.97 at 4 °C.
        assert_abs_diff_eq!(
            water_density(Celsius(20.0)).unwrap().value.0,
            998.2,
            epsilon = 0.05
        );
        assert_abs_diff_eq!(
            water_density(Celsius(25.0)).unwrap().value.0,
            997.05,
            epsilon = 0.05
        );
        assert_abs_diff_eq!(
            water_density(Celsius(4.0)).unwrap().value.0,
            999.97,
            epsilon = 0.05
        );
    }

    #[test]
    fn thirty_percent_is_4_37_molal() {
        // published arithmetic (REFERENCES §1.1): 30 wt% ↔ 4.370 mol/kg within 0.1 %.
        let m = molality_from_mass_fraction(MassFraction(0.30)).unwrap();
        assert!((m.0 / 4.370 - 1.0).abs() < 0.001, "{m}");
        let w = mass_fraction_from_molality(MolPerKg(4.370)).unwrap();
        assert!((w.0 / 0.30 - 1.0).abs() < 0.001, "{w}");
    }

    #[test]
    fn sg_inverse_round_trips() {
        // derived: the inverse must reproduce the §1.4 SG 25/25 column's mass fractions.
        for (wt, _, _, sg25) in CHECK {
            let w = mass_fraction_from_sg25(SpecificGravity(sg25)).unwrap();
            assert_abs_diff_eq!(w.0, wt / 100.0, epsilon = 0.0002);
        }
        // Tolerance of the solver itself (issue: 1e-9).
        for sg in [1.0, 1.1, 1.265, 1.4] {
            let w = mass_fraction_from_sg25(SpecificGravity(sg)).unwrap();
            let back = sg25_from_mass_fraction(w).unwrap();
            assert_abs_diff_eq!(back.0, sg, epsilon = 1e-9);
        }
        // SG 1.000 is pure water (definition of SG 25/25).
        assert_abs_diff_eq!(
            mass_fraction_from_sg25(SpecificGravity(1.0)).unwrap().0,
            0.0,
            epsilon = 1e-9
        );
    }

    #[test]
    fn temperature_ranges_and_flags() {
        let w = MassFraction(0.3);
        assert!(!solution_density(w, Celsius(-11.0)).unwrap().extrapolated);
        assert!(solution_density(w, Celsius(-20.0)).unwrap().extrapolated);
        assert!(solution_density(w, Celsius(-40.0)).unwrap().extrapolated);
        assert!(!solution_density(w, Celsius(70.0)).unwrap().extrapolated);
        assert!(matches!(
            solution_density(w, Celsius(-41.0)),
            Err(ElectrolyteError::TemperatureOutOfRange { .. })
        ));
        assert!(solution_density(w, Celsius(71.0)).is_err());
        assert!(solution_density(w, Celsius(f64::NAN)).is_err());
        assert!(water_density(Celsius(f64::INFINITY)).is_err());
        let sg = specific_gravity(w, Celsius(25.0), Celsius(-20.0)).unwrap();
        assert!(sg.extrapolated);
    }

    #[test]
    fn refuses_bad_composition() {
        assert!(solution_density(MassFraction(-0.01), Celsius(25.0)).is_err());
        assert!(solution_density(MassFraction(0.79), Celsius(25.0)).is_err());
        assert!(molality_from_mass_fraction(MassFraction(1.0)).is_err());
        assert!(mass_fraction_from_molality(MolPerKg(-1.0)).is_err());
        assert!(mass_fraction_from_molality(MolPerKg(f64::NAN)).is_err());
        assert!(mass_fraction_from_sg25(SpecificGravity(0.999)).is_err());
        assert!(mass_fraction_from_sg25(SpecificGravity(1.401)).is_err());
        assert!(molality_from_sg25(SpecificGravity(f64::NAN)).is_err());
    }
}
