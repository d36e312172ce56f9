//! Float-charge checks: the technician's round on a standby string that stays
//! on charge (float voltage per cell or monobloc, string float current,
//! temperatures).
//!
//! A float voltage is held up by the charger, not by the electrolyte, so it
//! says nothing about the state of charge: nothing in this module converts one
//! to a state of charge (the rest-voltage path refuses float readings too, see
//! [`crate::correct::CorrectError::FloatVoltage`]). What float readings do show
//! is whether each unit gets its share of the charger's voltage, whether a unit
//! runs hot, and, over visits, whether the float current has settled (fully
//! charged) or is rising (thermal runaway).
//!
//! [`check_unit`] judges one unit by hand; [`analyse_string`] judges one string
//! at one visit, with the earlier visits' float currents.

mod string;
mod unit;
mod window;

#[cfg(test)]
mod tests;

pub use string::{analyse_string, StringFloatAnalysis, CONSTANT_VOLTAGE_TOLERANCE_PERCENT};
pub use unit::{check_unit, UnitFloatCheck};
pub use window::{compensated_minimum, compensated_window, compensation_temperature};

use crate::profile::store::ProfileStore;
use crate::units::{AmpHours, Amperes, Celsius, Volts};
use serde::{Deserialize, Serialize};

/// One unit (cell or monobloc) read on float at one visit.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct FloatReading {
    /// The unit's identifier as the site labels it.
    pub unit_id: String,
    /// The string the unit belongs to.
    pub string: Option<String>,
    /// Position in the string (1 = next to the positive end, by site convention).
    pub position: Option<u32>,
    /// When the reading was taken.
    pub taken_at: Option<chrono::NaiveDateTime>,
    /// Float voltage across the unit's terminals.
    pub volts: Volts,
    /// Cells in series in the unit.
    pub cells: u32,
    /// Unit (case, terminal or pilot-cell) temperature.
    pub temperature: Option<Celsius>,
    /// Room temperature near the unit.
    pub ambient: Option<Celsius>,
    /// Float current of the whole string (the same for every unit in series).
    pub float_current: Option<Amperes>,
    /// Rated capacity of the unit (and so of the string it is in series with).
    pub capacity: Option<AmpHours>,
}

/// What a float check found.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum FloatFlagCode {
    /// Below the temperature-compensated float window, or below the profile's minimum float.
    FloatLow,
    /// Above the temperature-compensated float window.
    FloatHigh,
    /// Further below the string's average float voltage per cell than the rules allow.
    FloatDeviation,
    /// Unit-to-unit temperature spread in the string too wide.
    TempSpread,
    /// A VRLA unit far above ambient, or the float current rising at constant voltage.
    ThermalRunawayRisk,
}

impl FloatFlagCode {
    /// The code as printed.
    pub fn as_str(self) -> &'static str {
        match self {
            FloatFlagCode::FloatLow => "float-low",
            FloatFlagCode::FloatHigh => "float-high",
            FloatFlagCode::FloatDeviation => "float-deviation",
            FloatFlagCode::TempSpread => "temp-spread",
            FloatFlagCode::ThermalRunawayRisk => "thermal-runaway-risk",
        }
    }
}

/// A float flag with its evidence, the rule that raised it and that rule's source.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct FloatFlag {
    /// The code.
    pub code: FloatFlagCode,
    /// The evidence in words and numbers.
    pub detail: String,
    /// The rule: a rules-table id, or the profile key for profile limits
    /// (`float-window`, `float-minimum`).
    pub rule: &'static str,
    /// Where the rule's value comes from.
    pub source: String,
    /// The units a string-level flag points at (the hottest and coldest for
    /// `temp-spread`). Empty for a flag about the whole string, and for a
    /// unit's own flag.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub units: Vec<String>,
}

/// Float readings that cannot be checked.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum FloatError {
    /// The profile carries no float data.
    #[error("profile '{profile}' has no [float] section, so its float window is unknown; {}", if with_float.is_empty() { "add a [float] section to a user profile".to_string() } else { format!("profiles with one: {}", with_float.join(", ")) })]
    NoFloatSection {
        /// The profile asked for.
        profile: String,
        /// Built-in profiles that do have a `[float]` section.
        with_float: Vec<String>,
    },
    /// A unit with no cells.
    #[error("unit '{unit_id}': cells must be at least 1")]
    NoCells {
        /// The unit.
        unit_id: String,
    },
    /// A value is NaN or infinite.
    #[error("unit '{unit_id}': {quantity} is not a finite number")]
    NotFinite {
        /// The unit (or the visit, for earlier currents).
        unit_id: String,
        /// Which value.
        quantity: &'static str,
    },
    /// A value outside what a float reading can be.
    #[error("unit '{unit_id}': {quantity} {} is not usable: expected {expected}", crate::units::Shown(*.value))]
    OutOfRange {
        /// The unit (or the visit, for earlier currents).
        unit_id: String,
        /// Which value.
        quantity: &'static str,
        /// The value given.
        value: f64,
        /// What is expected.
        expected: &'static str,
    },
    /// A string analysis with no readings.
    #[error("string '{0}' has no float readings to analyse")]
    EmptyString(String),
    /// A reading that names another string.
    #[error(
        "unit '{unit_id}' belongs to string '{found}', not to string '{expected}' being analysed"
    )]
    WrongString {
        /// The unit.
        unit_id: String,
        /// The string the reading names.
        found: String,
        /// The string being analysed.
        expected: String,
    },
}

/// The ids of the profiles in a store that carry a `[float]` section, sorted.
pub fn profiles_with_float(store: &ProfileStore) -> Vec<String> {
    store
        .iter()
        .filter(|p| p.spec.float.is_some())
        .map(|p| p.id().to_string())
        .collect()
}

/// The error for a profile without float data, naming the built-ins that have it.
fn no_float_section(profile: &str) -> FloatError {
    FloatError::NoFloatSection {
        profile: profile.to_string(),
        // Best effort: the built-ins are embedded and validated by their own tests,
        // and an error message must not fail because of them.
        with_float: ProfileStore::builtin()
            .map(|s| profiles_with_float(&s))
            .unwrap_or_default(),
    }
}
