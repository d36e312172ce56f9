//! Thermodynamics of the lead-acid electrolyte: acid density, specific
//! gravity, molality, cell open-circuit voltage, hydrometer temperature
//! correction and freezing point.
//!
//! # Conventions
//! - **SG 25/25.** A [`SpecificGravity`] here is the density of the solution at
//!   25 °C divided by the density of pure water at 25 °C, unless a function
//!   name or doc says otherwise ([`specific_gravity`] takes both temperatures).
//! - **Validity.** Every model keeps its published range. Inside it a result is
//!   plain (`extrapolated: false`). Temperatures outside the published range
//!   but within [`TEMPERATURE_MIN_C`]..=[`TEMPERATURE_MAX_C`] are computed and
//!   marked `extrapolated: true`; beyond that they are refused with
//!   [`ElectrolyteError::TemperatureOutOfRange`]. Specific gravities outside
//!   [`SG_MIN`]..=[`SG_MAX`] are refused.
//! - **No NaN.** Every result is checked to be finite before it is returned;
//!   a NaN or infinite input fails a range check and gives a typed error.
//!
//! Sources: REFERENCES §1 (Bode OCV polynomial, CRC Gibbs energies, derived
//! dE/dT table, Laliberté density model), §2 (hydrometer rules), §3 (US Army
//! TM 5-1185 freezing table).

pub mod density;
pub mod freezing;
pub mod gibbs;
pub mod hydrometer;
pub mod ocv;

pub use density::{
    mass_fraction_from_molality, mass_fraction_from_sg25, molality_from_mass_fraction,
    molality_from_sg25, sg25_from_mass_fraction, solution_density, specific_gravity, water_density,
    LALIBERTE_MASS_FRACTION_MAX, LALIBERTE_MAX_C, LALIBERTE_MIN_C,
};
pub use freezing::{freezing_point, freezing_point_checked};
pub use gibbs::{
    lead_acid_reaction_bisulfate, lead_acid_reaction_sulfate, standard_potential,
    try_standard_potential, Reaction, Species, FARADAY_C_PER_MOL,
};
pub use hydrometer::{correct_to_25c, HydrometerRule};
pub use ocv::{
    cell_ocv, cell_ocv_25c, cell_ocv_25c_from_sg25, negative_electrode_potential_25c,
    ocv_temperature_coefficient, positive_electrode_potential_25c, DEDT_TABLE_MAX_C,
    DEDT_TABLE_MIN_C, OCV_MOLALITY_MAX, OCV_MOLALITY_MIN,
};

use crate::units::SpecificGravity;

/// Molar mass of sulfuric acid, g/mol (REFERENCES §1.1).
pub const H2SO4_MOLAR_MASS_G_PER_MOL: f64 = 98.079;

/// Coldest temperature accepted at all, °C. Colder is refused, not extrapolated.
pub const TEMPERATURE_MIN_C: f64 = -40.0;
/// Hottest temperature accepted at all, °C. Hotter is refused, not extrapolated.
pub const TEMPERATURE_MAX_C: f64 = 70.0;

/// Lowest specific gravity accepted (pure water).
pub const SG_MIN: f64 = 1.000;
/// Highest specific gravity accepted; beyond any battery electrolyte in service.
pub const SG_MAX: f64 = 1.400;

/// A value with a note whether it came from outside the model's published validity range.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize)]
pub struct Checked<T> {
    /// The computed value.
    pub value: T,
    /// True when an input lay outside the model's published range (the value
    /// is an extrapolation and deserves less trust).
    pub extrapolated: bool,
}

impl<T> Checked<T> {
    /// Apply `f` to the value, keeping the extrapolation note.
    pub fn map<U>(self, f: impl FnOnce(T) -> U) -> Checked<U> {
        Checked {
            value: f(self.value),
            extrapolated: self.extrapolated,
        }
    }
}

/// Why an electrolyte computation was refused.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ElectrolyteError {
    /// A temperature lay beyond the range any model here is used for.
    #[error("temperature {} °C is outside the accepted range {min} to {max} °C", crate::units::Shown(*.celsius))]
    TemperatureOutOfRange {
        /// The temperature given.
        celsius: f64,
        /// Lowest accepted, °C.
        min: f64,
        /// Highest accepted, °C.
        max: f64,
    },
    /// A specific gravity lay outside 1.000..=1.400.
    #[error("specific gravity {} is outside the accepted range 1.000 to 1.400 (SG 25/25 of battery acid)", crate::units::Shown(*.sg))]
    SgOutOfRange {
        /// The specific gravity given.
        sg: f64,
    },
    /// A molality lay outside the range of the model asked for.
    #[error(
        "molality {mol_per_kg} mol/kg is outside the range {min} to {max} mol/kg of this model"
    )]
    MolalityOutOfRange {
        /// The molality given, mol H2SO4 per kg water.
        mol_per_kg: f64,
        /// Lowest accepted, mol/kg.
        min: f64,
        /// Highest accepted, mol/kg.
        max: f64,
    },
    /// A mass fraction lay outside the range of the model asked for.
    #[error("mass fraction {mass_fraction} is outside the range {min} to {max} (kg H2SO4 per kg solution)")]
    MassFractionOutOfRange {
        /// The mass fraction given.
        mass_fraction: f64,
        /// Lowest accepted.
        min: f64,
        /// Highest accepted.
        max: f64,
    },
    /// A hydrometer reading is lighter than pure water at the sample
    /// temperature under the density model, so no acid strength matches it.
    #[error("hydrometer reading {sg_read} at {celsius} °C is below pure water at that temperature ({water_sg:.4}): no acid concentration matches; check the reading and the thermometer")]
    ReadingBelowWater {
        /// The reading as taken.
        sg_read: f64,
        /// The sample temperature, °C.
        celsius: f64,
        /// What pure water reads at that temperature on the same scale.
        water_sg: f64,
    },
    /// A reaction cannot give a potential (no electrons, or a non-finite energy).
    #[error("reaction '{reaction}' cannot give a potential: {reason}")]
    InvalidReaction {
        /// The reaction's name.
        reaction: String,
        /// What was wrong with it.
        reason: String,
    },
    /// A computation produced NaN or infinity (a defect, reported rather than returned).
    #[error("{what} came out as {value}, not a finite number")]
    NotFinite {
        /// What was being computed.
        what: &'static str,
        /// The non-finite value.
        value: f64,
    },
}

/// Refuse a temperature beyond the hard limits; otherwise say whether it lies
/// outside the published range `[published_min_c, published_max_c]`.
pub(crate) fn classify_temperature(
    celsius: f64,
    published_min_c: f64,
    published_max_c: f64,
) -> Result<bool, ElectrolyteError> {
    if !(TEMPERATURE_MIN_C..=TEMPERATURE_MAX_C).contains(&celsius) {
        return Err(ElectrolyteError::TemperatureOutOfRange {
            celsius,
            min: TEMPERATURE_MIN_C,
            max: TEMPERATURE_MAX_C,
        });
    }
    Ok(!(published_min_c..=published_max_c).contains(&celsius))
}

/// Refuse a specific gravity outside [`SG_MIN`]..=[`SG_MAX`] (NaN included).
pub(crate) fn check_sg(sg: SpecificGravity) -> Result<f64, ElectrolyteError> {
    if (SG_MIN..=SG_MAX).contains(&sg.0) {
        Ok(sg.0)
    } else {
        Err(ElectrolyteError::SgOutOfRange { sg: sg.0 })
    }
}

/// Pass a finite number through; report anything else as a typed error.
pub(crate) fn finite(value: f64, what: &'static str) -> Result<f64, ElectrolyteError> {
    if value.is_finite() {
        Ok(value)
    } else {
        Err(ElectrolyteError::NotFinite { what, value })
    }
}

/// Solve `f(x) = target` for increasing `f` on `[lo, hi]` by bisection until
/// the bracket is narrower than `tol`. Bisection rather than Newton because it
/// cannot leave the bracket, where the models are not defined.
pub(crate) fn bisect_increasing(
    f: impl Fn(f64) -> Result<f64, ElectrolyteError>,
    target: f64,
    mut lo: f64,
    mut hi: f64,
    tol: f64,
) -> Result<f64, ElectrolyteError> {
    for _ in 0..200 {
        if hi - lo <= tol {
            break;
        }
        let mid = 0.5 * (lo + hi);
        if f(mid)? < target {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    finite(0.5 * (lo + hi), "bisection root")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn temperature_classes() {
        // Limits are this crate's policy (issue), checked against the constants.
        assert_eq!(classify_temperature(25.0, -11.0, 75.0), Ok(false));
        assert_eq!(classify_temperature(-20.0, -11.0, 75.0), Ok(true));
        assert_eq!(classify_temperature(-40.0, -11.0, 75.0), Ok(true));
        assert!(classify_temperature(-40.1, -11.0, 75.0).is_err());
        assert!(classify_temperature(70.1, -11.0, 75.0).is_err());
        assert!(classify_temperature(f64::NAN, -11.0, 75.0).is_err());
    }

    #[test]
    fn sg_limits() {
        assert!(check_sg(SpecificGravity(0.999)).is_err());
        assert!(check_sg(SpecificGravity(1.401)).is_err());
        assert!(check_sg(SpecificGravity(f64::NAN)).is_err());
        assert_eq!(check_sg(SpecificGravity(1.265)), Ok(1.265));
    }

    #[test]
    fn error_messages_say_what_and_expected() {
        let e = ElectrolyteError::SgOutOfRange { sg: 1.5 };
        assert!(e.to_string().contains("1.5") && e.to_string().contains("1.400"));
    }

    mod never_nan {
        use super::super::*;
        use crate::units::{Celsius, MassFraction, MolPerKg};
        use proptest::prelude::*;

        proptest! {
            // Property (issue): over inputs well beyond every range, each call
            // either refuses or returns a finite number; none panics.
            #[test]
            fn every_ok_is_finite(
                t in -100.0f64..150.0,
                t2 in -100.0f64..150.0,
                sg in 0.8f64..1.6,
                w in -0.2f64..1.2,
                m in -1.0f64..50.0,
            ) {
                let temp = Celsius(t);
                let sgv = SpecificGravity(sg);
                if let Ok(c) = water_density(temp) { prop_assert!(c.value.0.is_finite()); }
                if let Ok(c) = solution_density(MassFraction(w), temp) { prop_assert!(c.value.0.is_finite()); }
                if let Ok(c) = specific_gravity(MassFraction(w), temp, Celsius(t2)) { prop_assert!(c.value.0.is_finite()); }
                if let Ok(v) = sg25_from_mass_fraction(MassFraction(w)) { prop_assert!(v.0.is_finite()); }
                if let Ok(v) = mass_fraction_from_sg25(sgv) { prop_assert!(v.0.is_finite()); }
                if let Ok(v) = molality_from_mass_fraction(MassFraction(w)) { prop_assert!(v.0.is_finite()); }
                if let Ok(v) = mass_fraction_from_molality(MolPerKg(m)) { prop_assert!(v.0.is_finite()); }
                if let Ok(v) = molality_from_sg25(sgv) { prop_assert!(v.0.is_finite()); }
                if let Ok(v) = cell_ocv_25c(MolPerKg(m)) { prop_assert!(v.0.is_finite()); }
                if let Ok(v) = ocv_temperature_coefficient(MolPerKg(m)) { prop_assert!(v.0.is_finite()); }
                if let Ok(c) = cell_ocv(MolPerKg(m), temp) { prop_assert!(c.value.0.is_finite()); }
                if let Ok(v) = cell_ocv_25c_from_sg25(sgv) { prop_assert!(v.0.is_finite()); }
                for rule in [HydrometerRule::Step167, HydrometerRule::Army10F, HydrometerRule::DensityModel] {
                    if let Ok(c) = correct_to_25c(sgv, temp, rule) { prop_assert!(c.value.0.is_finite()); }
                }
                if let Ok(v) = freezing_point(sgv) { prop_assert!(v.0.is_finite()); }
                // Refusals follow the stated limits.
                if !(TEMPERATURE_MIN_C..=TEMPERATURE_MAX_C).contains(&t) {
                    prop_assert!(water_density(temp).is_err());
                }
                if !(SG_MIN..=SG_MAX).contains(&sg) {
                    prop_assert!(mass_fraction_from_sg25(sgv).is_err());
                    prop_assert!(freezing_point(sgv).is_err());
                }
            }
        }
    }
}
