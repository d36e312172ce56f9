//! Temperature correction of hydrometer readings to SG 25/25.
//!
//! A hydrometer reads the acid at whatever temperature it is; state-of-charge
//! tables want the SG it would have at 25 °C. Three rules are offered, each
//! with its reference temperature kept beside it (REFERENCES §2).

use super::density::{solution_density_raw, water_density_raw};
use super::{
    bisect_increasing, check_sg, classify_temperature, finite, sg25_from_mass_fraction, Checked,
    ElectrolyteError, LALIBERTE_MASS_FRACTION_MAX, LALIBERTE_MAX_C, LALIBERTE_MIN_C,
};
use crate::units::{Celsius, MassFraction, SpecificGravity};

/// How a hydrometer reading taken at some temperature is referred to 25 °C.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum HydrometerRule {
    /// Add 0.001 per 1.67 °C (3 °F) above 25 °C, subtract below (IEEE Std 450
    /// practice, REFERENCES §2, memory). The step is taken as exactly 3 °F = 5/3 K.
    #[default]
    Step167,
    /// Add 0.004 per 10 °F above 80 °F, subtract below (US Army
    /// TM 5-4210-230-14&P-1, REFERENCES §2, published). See
    /// [`correct_to_25c`] for how its 80 °F reference is treated.
    Army10F,
    /// Invert the Laliberté density model: the reading is taken as the density
    /// of the sample at its own temperature over water at 25 °C.
    DensityModel,
}

impl HydrometerRule {
    /// The temperature the rule's corrected value is referred to in its source.
    /// [`correct_to_25c`] reports every rule's result as SG 25/25; for
    /// [`HydrometerRule::Army10F`] that is the simplification documented there.
    pub fn source_reference_temperature(self) -> Celsius {
        match self {
            HydrometerRule::Step167 | HydrometerRule::DensityModel => Celsius(25.0),
            HydrometerRule::Army10F => Celsius::from_fahrenheit(80.0),
        }
    }
}

/// Refer a hydrometer reading `sg_read` taken at acid temperature `t` to 25 °C.
///
/// - `sg_read` must lie in 1.000..=1.400; `t` in −40..=70 °C. Outside the
///   Laliberté range (−11..=75 °C) the result is marked `extrapolated` for
///   every rule: the linear rules come with no stated range, and they
///   approximate the same physics.
/// - The result is not rounded; hydrometers read to 0.001, so round for display.
/// - [`HydrometerRule::Step167`]: `sg_read + 0.001·(t − 25 °C)/(5/3 K)`.
/// - [`HydrometerRule::Army10F`]: `sg_read + 0.004·(t_°F − 80)/10`, the rule as
///   the manual gives it. Its result is referred to 80 °F (26.7 °C) and is
///   returned unchanged as the 25 °C value: the 3 °F between 80 °F and 77 °F
///   amount to about 0.001 SG (0.0012 by the same rule), which is a hydrometer's
///   reading step, and shifting it would break agreement with the manual's
///   worked figures. Use Step167 or DensityModel when the last 0.001 matters.
/// - [`HydrometerRule::DensityModel`]: the hydrometer is defined as reading
///   ρ(w, t)/ρ_water(25 °C), i.e. a scale marked in SG 25/25 whose own glass
///   expansion is neglected. The mass fraction w that gives the reading at `t`
///   is found by bisection, and SG 25/25 of that w is returned. A reading
///   lighter than pure water at `t` is refused with
///   [`ElectrolyteError::ReadingBelowWater`].
pub fn correct_to_25c(
    sg_read: SpecificGravity,
    t: Celsius,
    rule: HydrometerRule,
) -> Result<Checked<SpecificGravity>, ElectrolyteError> {
    let reading = check_sg(sg_read)?;
    let extrapolated = classify_temperature(t.0, LALIBERTE_MIN_C, LALIBERTE_MAX_C)?;
    let corrected = match rule {
        HydrometerRule::Step167 => reading + 0.001 * (t.0 - 25.0) / (5.0 / 3.0),
        HydrometerRule::Army10F => reading + 0.004 * (t.to_fahrenheit() - 80.0) / 10.0,
        HydrometerRule::DensityModel => density_model_sg25(reading, t.0)?,
    };
    Ok(Checked {
        value: SpecificGravity(finite(corrected, "corrected specific gravity")?),
        extrapolated,
    })
}

fn density_model_sg25(reading: f64, t: f64) -> Result<f64, ElectrolyteError> {
    let water_25 = water_density_raw(25.0);
    let reads = |w: f64| solution_density_raw(w, t) / water_25;
    let water_sg = finite(reads(0.0), "water reading")?;
    if reading < water_sg {
        return Err(ElectrolyteError::ReadingBelowWater {
            sg_read: reading,
            celsius: t,
            water_sg,
        });
    }
    if reading > reads(LALIBERTE_MASS_FRACTION_MAX) {
        return Err(ElectrolyteError::SgOutOfRange { sg: reading });
    }
    let w = bisect_increasing(
        |w| finite(reads(w), "hydrometer model"),
        reading,
        0.0,
        LALIBERTE_MASS_FRACTION_MAX,
        1e-12,
    )?;
    Ok(sg25_from_mass_fraction(MassFraction(w))?.0)
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

    fn round3(x: f64) -> f64 {
        (x * 1000.0).round() / 1000.0
    }

    #[test]
    fn army_worked_example() {
        // published: US Army TM 5-4210-230-14&P-1, 1.250 read at 20 °F → 1.226 (REFERENCES §2).
        let c = correct_to_25c(
            SpecificGravity(1.250),
            Celsius::from_fahrenheit(20.0),
            HydrometerRule::Army10F,
        )
        .unwrap();
        assert_eq!(round3(c.value.0), 1.226);
        assert!(!c.extrapolated);
    }

    #[test]
    fn step_worked_example_and_sign() {
        // memory (IEEE Std 450 practice, REFERENCES §2): 1.255 read at 35 °C → 1.261.
        let hot = correct_to_25c(
            SpecificGravity(1.255),
            Celsius(35.0),
            HydrometerRule::Step167,
        )
        .unwrap();
        assert_eq!(round3(hot.value.0), 1.261);
        // Same rule: subtract below 25 °C, nothing at 25 °C.
        let cold = correct_to_25c(
            SpecificGravity(1.255),
            Celsius(15.0),
            HydrometerRule::Step167,
        )
        .unwrap();
        assert_eq!(round3(cold.value.0), 1.249);
        let at25 = correct_to_25c(
            SpecificGravity(1.255),
            Celsius(25.0),
            HydrometerRule::Step167,
        )
        .unwrap();
        assert_abs_diff_eq!(at25.value.0, 1.255, epsilon = 1e-12);
    }

    #[test]
    fn density_model_matches_model_slopes() {
        // derived (REFERENCES §2): dSG/dT at 25 °C is −0.00047 (1.10), −0.00064 (1.20),
        // −0.00073 (1.265) per K, so a reading 5 K warm is corrected up by about 5× that.
        for (sg, slope) in [(1.10, 0.00047), (1.20, 0.00064), (1.265, 0.00073)] {
            let c = correct_to_25c(
                SpecificGravity(sg),
                Celsius(30.0),
                HydrometerRule::DensityModel,
            )
            .unwrap();
            assert_abs_diff_eq!(c.value.0 - sg, 5.0 * slope, epsilon = 0.0002);
            let c = correct_to_25c(
                SpecificGravity(sg),
                Celsius(20.0),
                HydrometerRule::DensityModel,
            )
            .unwrap();
            assert_abs_diff_eq!(sg - c.value.0, 5.0 * slope, epsilon = 0.0002);
        }
        // At 25 °C the model's correction vanishes (definition of SG 25/25).
        let c = correct_to_25c(
            SpecificGravity(1.2),
            Celsius(25.0),
            HydrometerRule::DensityModel,
        )
        .unwrap();
        assert_abs_diff_eq!(c.value.0, 1.2, epsilon = 1e-9);
    }

    #[test]
    fn density_model_near_step_rule() {
        // common practice vs derived: the step rule's 0.0006/K and the model's slope
        // (0.00064/K at SG 1.20 rising with SG, REFERENCES §2) differ by under 0.0001/K,
        // so over 15–35 °C they agree within 0.001, one hydrometer reading step.
        for t in [15.0, 20.0, 30.0, 35.0] {
            let model = correct_to_25c(
                SpecificGravity(1.2),
                Celsius(t),
                HydrometerRule::DensityModel,
            )
            .unwrap();
            let step =
                correct_to_25c(SpecificGravity(1.2), Celsius(t), HydrometerRule::Step167).unwrap();
            assert_abs_diff_eq!(model.value.0, step.value.0, epsilon = 0.001);
        }
    }

    #[test]
    fn refusals_and_flags() {
        for rule in [
            HydrometerRule::Step167,
            HydrometerRule::Army10F,
            HydrometerRule::DensityModel,
        ] {
            assert!(correct_to_25c(SpecificGravity(0.99), Celsius(25.0), rule).is_err());
            assert!(correct_to_25c(SpecificGravity(1.41), Celsius(25.0), rule).is_err());
            assert!(correct_to_25c(SpecificGravity(f64::NAN), Celsius(25.0), rule).is_err());
            assert!(correct_to_25c(SpecificGravity(1.2), Celsius(-45.0), rule).is_err());
            assert!(correct_to_25c(SpecificGravity(1.2), Celsius(75.0), rule).is_err());
            assert!(
                correct_to_25c(SpecificGravity(1.2), Celsius(-30.0), rule)
                    .unwrap()
                    .extrapolated
            );
        }
        // Pure water at 4 °C is denser than at 25 °C (from memory: 999.97 vs 997.05 kg/m³),
        // so a 1.000 reading in the cold is lighter than water: refused.
        assert!(matches!(
            correct_to_25c(
                SpecificGravity(1.0),
                Celsius(4.0),
                HydrometerRule::DensityModel
            ),
            Err(ElectrolyteError::ReadingBelowWater { .. })
        ));
    }

    #[test]
    fn serde_names() {
        assert_eq!(
            serde_json::to_string(&HydrometerRule::Army10F).unwrap(),
            "\"army10-f\""
        );
        assert_eq!(HydrometerRule::default(), HydrometerRule::Step167);
    }
}
