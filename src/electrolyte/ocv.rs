//! Open-circuit voltage of one lead-acid cell from acid molality and temperature.
//!
//! 25 °C values: H. Bode, *Lead-Acid Batteries* (Wiley 1977), polynomial in
//! x = log10(m) as used by Sulzer et al., J. Electrochem. Soc. 166(12) A2363
//! (2019) (REFERENCES §1.1). Temperature coefficient: table derived from CRC
//! ΔS° with Clegg–Rard–Pitzer activities for 15–35 °C (REFERENCES §1.3).

use super::{classify_temperature, finite, molality_from_sg25, Checked, ElectrolyteError};
use crate::units::{Celsius, MillivoltsPerKelvin, MolPerKg, SpecificGravity, Volts};

/// Lowest molality the Bode polynomial is used for, mol/kg.
pub const OCV_MOLALITY_MIN: f64 = 0.1;
/// Highest molality the Bode polynomial is used for, mol/kg.
pub const OCV_MOLALITY_MAX: f64 = 8.0;
/// Low end of the temperature range the dE/dT table was derived for, °C.
pub const DEDT_TABLE_MIN_C: f64 = 15.0;
/// High end of the temperature range the dE/dT table was derived for, °C.
pub const DEDT_TABLE_MAX_C: f64 = 35.0;

/// Positive electrode (PbO2) vs SHE, c0..c4 (REFERENCES §1.1).
const POSITIVE: [f64; 5] = [1.628, 0.074, 0.033, 0.043, 0.022];
/// Negative electrode (Pb) vs SHE, c0..c4 (REFERENCES §1.1).
const NEGATIVE: [f64; 5] = [-0.294, -0.074, -0.030, -0.031, -0.012];

/// (m mol/kg, dE/dT mV/K per cell), REFERENCES §1.3 (derived).
const DEDT_TABLE: [(f64, f64); 8] = [
    (0.1, -0.21),
    (0.5, 0.00),
    (1.0, 0.11),
    (2.0, 0.22),
    (3.0, 0.25),
    (4.0, 0.23),
    (5.0, 0.20),
    (6.0, 0.18),
];

fn check_molality(m: MolPerKg) -> Result<f64, ElectrolyteError> {
    if (OCV_MOLALITY_MIN..=OCV_MOLALITY_MAX).contains(&m.0) {
        Ok(m.0)
    } else {
        Err(ElectrolyteError::MolalityOutOfRange {
            mol_per_kg: m.0,
            min: OCV_MOLALITY_MIN,
            max: OCV_MOLALITY_MAX,
        })
    }
}

fn polynomial(coefficients: &[f64; 5], m: f64) -> f64 {
    let x = m.log10();
    coefficients.iter().rev().fold(0.0, |acc, c| acc * x + c)
}

/// Potential of the positive (PbO2/PbSO4) electrode vs SHE at 25 °C, molality 0.1..=8 mol/kg.
pub fn positive_electrode_potential_25c(m: MolPerKg) -> Result<Volts, ElectrolyteError> {
    let m = check_molality(m)?;
    Ok(Volts(finite(
        polynomial(&POSITIVE, m),
        "positive electrode potential",
    )?))
}

/// Potential of the negative (Pb/PbSO4) electrode vs SHE at 25 °C, molality 0.1..=8 mol/kg.
pub fn negative_electrode_potential_25c(m: MolPerKg) -> Result<Volts, ElectrolyteError> {
    let m = check_molality(m)?;
    Ok(Volts(finite(
        polynomial(&NEGATIVE, m),
        "negative electrode potential",
    )?))
}

/// Open-circuit voltage of one cell at 25 °C (Bode polynomial), positive − negative electrode.
///
/// Refused outside 0.1..=8 mol/kg: the source states no range, and a check
/// against the Clegg–Rard–Pitzer activities holds over 0.1–6 mol/kg (§1.1).
pub fn cell_ocv_25c(m: MolPerKg) -> Result<Volts, ElectrolyteError> {
    let positive = positive_electrode_potential_25c(m)?;
    let negative = negative_electrode_potential_25c(m)?;
    Ok(Volts(finite(positive.0 - negative.0, "cell OCV")?))
}

/// dE/dT of one cell's OCV, linear interpolation in m of the REFERENCES §1.3 table.
///
/// Accepts the same 0.1..=8 mol/kg as [`cell_ocv_25c`]. The table ends at
/// 6 mol/kg; from 6 to 8 mol/kg the 6 mol/kg value (+0.18 mV/K) is used
/// unchanged (clamped, not extrapolated), since the table's trend there is flat
/// within its ±0.05 mV/K confidence.
pub fn ocv_temperature_coefficient(m: MolPerKg) -> Result<MillivoltsPerKelvin, ElectrolyteError> {
    let m = check_molality(m)?;
    let (first, last) = (DEDT_TABLE[0], DEDT_TABLE[DEDT_TABLE.len() - 1]);
    let coefficient = if m <= first.0 {
        first.1
    } else if m >= last.0 {
        last.1
    } else {
        DEDT_TABLE
            .windows(2)
            .find(|pair| m <= pair[1].0)
            .map(|pair| {
                let ((m0, d0), (m1, d1)) = (pair[0], pair[1]);
                d0 + (d1 - d0) * (m - m0) / (m1 - m0)
            })
            .unwrap_or(last.1)
    };
    Ok(MillivoltsPerKelvin(finite(coefficient, "dE/dT")?))
}

/// Open-circuit voltage of one cell at `t`: E25 + dE/dT·(t − 25 °C).
///
/// The dE/dT table was derived for 15–35 °C, so results outside that band
/// (down to −40 °C, up to 70 °C) are computed and marked `extrapolated`;
/// beyond −40..=70 °C the temperature is refused. The linear form is the
/// first-order term only; over ±10 K it is within the table's ±0.05 mV/K.
pub fn cell_ocv(m: MolPerKg, t: Celsius) -> Result<Checked<Volts>, ElectrolyteError> {
    let extrapolated = classify_temperature(t.0, DEDT_TABLE_MIN_C, DEDT_TABLE_MAX_C)?;
    let e25 = cell_ocv_25c(m)?;
    let coefficient = ocv_temperature_coefficient(m)?;
    let volts = e25.0 + coefficient.0 / 1000.0 * (t.0 - 25.0);
    Ok(Checked {
        value: Volts(finite(volts, "cell OCV")?),
        extrapolated,
    })
}

/// Open-circuit voltage of one cell at 25 °C from the SG 25/25 of its acid:
/// SG → mass fraction (Laliberté) → molality → Bode polynomial.
///
/// SG outside 1.000..=1.400 is refused; so is very dilute acid below about
/// SG 1.0065, whose molality falls under the polynomial's 0.1 mol/kg.
pub fn cell_ocv_25c_from_sg25(sg: SpecificGravity) -> Result<Volts, ElectrolyteError> {
    cell_ocv_25c(molality_from_sg25(sg)?)
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

    #[test]
    fn polynomial_check_values() {
        // published coefficients, arithmetic check values (REFERENCES §1.1), 1e-5 V.
        for (m, volts) in [
            (1.0, 1.92200),
            (2.0, 1.97456),
            (4.0, 2.05456),
            (6.0, 2.12265),
        ] {
            assert_abs_diff_eq!(cell_ocv_25c(MolPerKg(m)).unwrap().0, volts, epsilon = 1e-5);
        }
    }

    #[test]
    fn electrodes_add_up_to_the_published_cell_row() {
        // published: the §1.1 cell row is 1.922, 0.148, 0.063, 0.074, 0.034.
        let cell = [1.922, 0.148, 0.063, 0.074, 0.034];
        for i in 0..5 {
            assert_abs_diff_eq!(POSITIVE[i] - NEGATIVE[i], cell[i], epsilon = 1e-12);
        }
        let m = MolPerKg(3.0);
        let e = cell_ocv_25c(m).unwrap().0;
        let (p, n) = (
            positive_electrode_potential_25c(m).unwrap().0,
            negative_electrode_potential_25c(m).unwrap().0,
        );
        assert_abs_diff_eq!(p - n, e, epsilon = 1e-12);
        // from memory: PbO2/PbSO4 is near +1.7 V and Pb/PbSO4 near −0.35 V vs SHE in battery acid.
        assert!(p > 1.6 && p < 1.8 && n < -0.3 && n > -0.4, "{p} {n}");
    }

    #[test]
    fn twelve_volt_chain() {
        let sgs = [1.265, 1.225, 1.190, 1.155, 1.120];
        // derived (REFERENCES §1.5): SG → w → m → 6 × cell OCV, 0.005 V.
        let derived = [12.658, 12.436, 12.248, 12.064, 11.878];
        // common practice (REFERENCES §1.5): trade 12 V table, 0.03 V.
        let trade = [12.65, 12.45, 12.24, 12.06, 11.89];
        for i in 0..5 {
            let block = 6.0 * cell_ocv_25c_from_sg25(SpecificGravity(sgs[i])).unwrap().0;
            assert_abs_diff_eq!(block, derived[i], epsilon = 0.005);
            assert_abs_diff_eq!(block, trade[i], epsilon = 0.03);
        }
    }

    #[test]
    fn sg_plus_0_84_rule_of_thumb() {
        // common practice (REFERENCES §1.5): OCV per cell ≈ SG + 0.84 V, within 0.025 V over 1.10–1.30.
        for i in 0..=20 {
            let sg = 1.10 + 0.01 * f64::from(i);
            let e = cell_ocv_25c_from_sg25(SpecificGravity(sg)).unwrap().0;
            assert_abs_diff_eq!(e, sg + 0.84, epsilon = 0.025);
        }
    }

    #[test]
    fn temperature_coefficient() {
        // derived (REFERENCES §1.3): +0.22 mV/K ± 0.1 over 2–5 mol/kg.
        for i in 0..=30 {
            let m = 2.0 + 0.1 * f64::from(i);
            let d = ocv_temperature_coefficient(MolPerKg(m)).unwrap().0;
            assert_abs_diff_eq!(d, 0.22, epsilon = 0.1);
        }
        // derived (§1.3): sign change near 0.5 mol/kg, table nodes reproduced.
        assert_abs_diff_eq!(
            ocv_temperature_coefficient(MolPerKg(0.5)).unwrap().0,
            0.0,
            epsilon = 1e-12
        );
        assert!(ocv_temperature_coefficient(MolPerKg(0.2)).unwrap().0 < 0.0);
        assert_abs_diff_eq!(
            ocv_temperature_coefficient(MolPerKg(0.1)).unwrap().0,
            -0.21,
            epsilon = 1e-12
        );
        // Clamped beyond the table's end at 6 mol/kg (documented behaviour).
        assert_abs_diff_eq!(
            ocv_temperature_coefficient(MolPerKg(7.5)).unwrap().0,
            0.18,
            epsilon = 1e-12
        );
    }

    #[test]
    fn ocv_with_temperature() {
        let m = MolPerKg(4.0);
        let e25 = cell_ocv(m, Celsius(25.0)).unwrap();
        assert_abs_diff_eq!(e25.value.0, 2.05456, epsilon = 1e-5); // published arithmetic §1.1
        assert!(!e25.extrapolated);
        // derived (§1.3): +0.23 mV/K at 4 mol/kg → +2.3 mV at 35 °C.
        let e35 = cell_ocv(m, Celsius(35.0)).unwrap();
        assert_abs_diff_eq!(e35.value.0 - e25.value.0, 0.0023, epsilon = 1e-9);
        assert!(!e35.extrapolated);
        assert!(cell_ocv(m, Celsius(0.0)).unwrap().extrapolated);
        assert!(cell_ocv(m, Celsius(-41.0)).is_err());
        assert!(cell_ocv(m, Celsius(70.5)).is_err());
    }

    #[test]
    fn refuses_out_of_range_molality() {
        for m in [0.09, 8.01, -1.0, 0.0, f64::NAN, f64::INFINITY] {
            assert!(matches!(
                cell_ocv_25c(MolPerKg(m)),
                Err(ElectrolyteError::MolalityOutOfRange { .. })
            ));
            assert!(ocv_temperature_coefficient(MolPerKg(m)).is_err());
        }
        assert!(cell_ocv_25c_from_sg25(SpecificGravity(1.5)).is_err());
        // SG 1.000 is pure water: molality 0, below the polynomial's range.
        assert!(cell_ocv_25c_from_sg25(SpecificGravity(1.0)).is_err());
    }
}
