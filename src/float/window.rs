//! The temperature-compensated float window.
//!
//! A float charger lowers its voltage as the battery warms (and raises it as it
//! cools) so the float current, which rises steeply with temperature at a fixed
//! voltage, stays near its 25 °C value. The window a unit is judged against
//! therefore moves with the unit's temperature; outside the compensation range
//! it stops moving, as chargers clamp it.

use crate::profile::schema::FloatSection;
use crate::units::{Celsius, Volts};

/// Reference temperature of the profile's float values.
const REFERENCE_CELSIUS: f64 = 25.0;

/// The temperature the compensation is taken at: `t` clamped to the profile's
/// compensation range `[compensation_min, compensation_max]`.
pub fn compensation_temperature(f: &FloatSection, t: Celsius) -> Celsius {
    let lo = f.compensation_min_celsius.value;
    let hi = f.compensation_max_celsius.value;
    // The profile loader checks min ≤ 25 ≤ max ranges separately, not min ≤ max
    // against each other; taking the pair in order keeps clamp from panicking.
    let (lo, hi) = if lo <= hi { (lo, hi) } else { (hi, lo) };
    Celsius(t.0.clamp(lo, hi))
}

fn shift(f: &FloatSection, t: Celsius) -> f64 {
    f.compensation_mv_per_k_per_cell.value / 1000.0
        * (compensation_temperature(f, t).0 - REFERENCE_CELSIUS)
}

/// The temperature-compensated window per cell at temperature t: window ± compensation·(t − 25), with t clamped to [compensation_min, compensation_max]; the minimum float similarly.
///
/// Returns `(low, high)` volts per cell.
pub fn compensated_window(f: &FloatSection, t: Celsius) -> (Volts, Volts) {
    let d = shift(f, t);
    (
        Volts(f.window_low_volts_per_cell.value + d),
        Volts(f.window_high_volts_per_cell.value + d),
    )
}

/// The profile's minimum float per cell, compensated like the window: a warm
/// cell holds its float current at a lower voltage, so the undercharge limit
/// moves with it.
pub fn compensated_minimum(f: &FloatSection, t: Celsius) -> Volts {
    Volts(f.minimum_volts_per_cell.value + shift(f, t))
}
