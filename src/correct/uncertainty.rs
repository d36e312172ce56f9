//! Measurement uncertainty by the GUM law of propagation (JCGM 100:2008).
//!
//! The measurand is the equilibrium OCV per cell at 25 °C,
//! v = V/n − α·(T − 25 °C), with V the meter reading, n the cell count, α the
//! OCV temperature coefficient and T the battery temperature. Inputs are
//! uncorrelated; rectangular distributions (meter accuracy, resolution, curve
//! tolerance) have u = a/√3 for half-width a (JCGM 100:2008 §4.3.7). The
//! expanded uncertainty uses k = 2 (about 95 %, §6.3). The interval on v is
//! mapped through the monotone curve, which preserves its coverage.

use serde::Serialize;

/// One line of the uncertainty budget, as a standard uncertainty of the per-cell OCV.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Contribution {
    /// What the input quantity is.
    pub input: &'static str,
    /// Standard uncertainty it contributes to the per-cell OCV at 25 °C, mV.
    pub standard_uncertainty_mv_per_cell: f64,
    /// How it was evaluated.
    pub basis: String,
}

/// The budget: contributions, combined and expanded uncertainty.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Budget {
    /// Every contribution.
    pub contributions: Vec<Contribution>,
    /// Combined standard uncertainty (root sum of squares), mV per cell.
    pub combined_mv_per_cell: f64,
    /// Coverage factor.
    pub coverage_factor: f64,
    /// Expanded uncertainty U = k·u_c, mV per cell.
    pub expanded_mv_per_cell: f64,
}

/// Coverage factor for about 95 % (JCGM 100:2008 §6.3.3).
pub const COVERAGE_FACTOR: f64 = 2.0;

impl Budget {
    /// Combine contributions by root sum of squares (uncorrelated inputs).
    pub fn new(contributions: Vec<Contribution>) -> Budget {
        let combined = root_sum_of_squares(
            contributions
                .iter()
                .map(|c| c.standard_uncertainty_mv_per_cell),
        );
        Budget {
            contributions,
            combined_mv_per_cell: combined,
            coverage_factor: COVERAGE_FACTOR,
            expanded_mv_per_cell: COVERAGE_FACTOR * combined,
        }
    }
}

/// Combined standard uncertainty of uncorrelated inputs: the root sum of
/// squares of their standard uncertainties, summed in the order given. The
/// one place it is computed, so that a budget written out for `assess` and
/// the numbers-only path of `estimate` agree to the last bit.
pub fn root_sum_of_squares(standard_uncertainties: impl IntoIterator<Item = f64>) -> f64 {
    standard_uncertainties
        .into_iter()
        .map(|u| u.powi(2))
        .sum::<f64>()
        .sqrt()
}

/// Standard uncertainty of a rectangular distribution of half-width `a`.
pub fn rectangular(half_width: f64) -> f64 {
    half_width / 3f64.sqrt()
}
