//! What a calibration found, for people (text) and programs (serde).

use crate::units::{Millivolts, SocPercent, Volts};
use serde::Serialize;
use std::fmt::Write as _;

/// How the curve inside the covered range was fitted.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum FitMethod {
    /// Isotonic regression, then a monotone cubic through the pooled levels.
    Isotonic,
    /// A least-squares straight line (too few distinct levels for a shape).
    Linear,
}

/// One input point against the final curve.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Residual {
    /// Input line.
    pub line: u64,
    /// Known state of charge.
    pub soc: SocPercent,
    /// The point's OCV per cell at 25 °C.
    pub volts_per_cell_25c: Volts,
    /// The new curve's OCV per cell at that state of charge.
    pub curve_volts_per_cell_25c: Volts,
    /// Point minus curve, per cell.
    pub residual_mv_per_cell: Millivolts,
}

/// Points the isotonic step gave one common level because they contradicted
/// the rule that voltage rises with charge.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct PooledGroup {
    /// Input lines of the pooled points, in order of state of charge.
    pub lines: Vec<u64>,
    /// Lowest state of charge in the group.
    pub soc_from: SocPercent,
    /// Highest state of charge in the group.
    pub soc_to: SocPercent,
    /// The common level, OCV per cell at 25 °C.
    pub level_volts_per_cell_25c: Volts,
}

/// The calibration report.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct CalibrationReport {
    /// Id of the new profile.
    pub new_id: String,
    /// Id of the base profile.
    pub base_id: String,
    /// Input name.
    pub input_name: String,
    /// Number of points used.
    pub points: usize,
    /// How the covered range was fitted.
    pub method: FitMethod,
    /// Lowest known state of charge in the data.
    pub soc_min: SocPercent,
    /// Highest known state of charge in the data.
    pub soc_max: SocPercent,
    /// The fitted part of the curve runs between these states of charge; outside,
    /// the base profile's shape is shifted to join it.
    pub fitted_from: SocPercent,
    /// Upper end of the fitted part.
    pub fitted_to: SocPercent,
    /// Shift applied to the base curve below `fitted_from`, per cell (`None` if none needed).
    pub base_shift_below_mv_per_cell: Option<Millivolts>,
    /// Shift applied to the base curve above `fitted_to`, per cell.
    pub base_shift_above_mv_per_cell: Option<Millivolts>,
    /// Each point's residual against the final curve.
    pub residuals: Vec<Residual>,
    /// Levels the fit placed (pooled levels, or 2 for a line).
    pub fitted_parameters: usize,
    /// Residual degrees of freedom ν = tr((I − S)ᵀ(I − S)) of the fit (see [`crate::calibrate`]).
    pub residual_degrees_of_freedom: f64,
    /// Standard deviation of the residuals, sqrt(Σr² / ν); `None` when ν < 0.5.
    pub residual_sd_mv_per_cell: Option<Millivolts>,
    /// The value written as the new profile's `tolerance.curve_mv_per_cell`: a
    /// rectangular half-width, √3 × the residual SD (or the base's value when
    /// there is no SD).
    pub tolerance_mv_per_cell: Millivolts,
    /// The new profile's curve points `[soc_percent, volts_per_cell]`.
    pub curve_points: Vec<[f64; 2]>,
    /// Points pooled by the isotonic step.
    pub pooled: Vec<PooledGroup>,
    /// Things the user should know before trusting the new profile.
    pub warnings: Vec<String>,
}

impl CalibrationReport {
    /// A plain-text report for a terminal.
    pub fn render_text(&self) -> String {
        let mut s = String::new();
        // Writing to a String cannot fail.
        let _ = writeln!(
            s,
            "Calibrated profile '{}' from '{}' ({} points from {})",
            self.new_id, self.base_id, self.points, self.input_name
        );
        let _ = writeln!(
            s,
            "Fit: {}; data cover {:.1}–{:.1} % SOC; fitted curve {:.1}–{:.1} %, base shape outside",
            match self.method {
                FitMethod::Isotonic =>
                    "isotonic regression, monotone cubic through the pooled levels",
                FitMethod::Linear => "least-squares line (too few distinct levels for a shape)",
            },
            self.soc_min.0,
            self.soc_max.0,
            self.fitted_from.0,
            self.fitted_to.0
        );
        for (side, shift) in [
            ("below", self.base_shift_below_mv_per_cell),
            ("above", self.base_shift_above_mv_per_cell),
        ] {
            if let Some(m) = shift {
                let _ = writeln!(s, "  base curve {side} shifted by {:+.1} mV per cell", m.0);
            }
        }
        let _ = writeln!(s, "Curve points (SOC %, V per cell at 25 °C):");
        for [soc, v] in &self.curve_points {
            let _ = writeln!(s, "  {soc:6.2}  {v:.4}");
        }
        let _ = writeln!(s, "Residuals (point − curve, mV per cell):");
        for r in &self.residuals {
            let _ = writeln!(
                s,
                "  line {:>4}  {:6.2} %  {:.4} V  {:+6.1}",
                r.line, r.soc.0, r.volts_per_cell_25c.0, r.residual_mv_per_cell.0
            );
        }
        match self.residual_sd_mv_per_cell {
            Some(sd) => {
                let _ = writeln!(
                    s,
                    "Residual SD: {:.1} mV per cell ({} points, {} fitted levels, {:.1} residual degrees of freedom)",
                    sd.0, self.points, self.fitted_parameters, self.residual_degrees_of_freedom
                );
            }
            None => {
                let _ = writeln!(
                    s,
                    "Residual SD: not estimable ({} points, {:.2} residual degrees of freedom)",
                    self.points, self.residual_degrees_of_freedom
                );
            }
        }
        match self.residual_sd_mv_per_cell {
            Some(sd) => {
                let _ = writeln!(
                    s,
                    "Tolerance written: ±{:.1} mV per cell rectangular half-width (√3 × SD {:.1}, so its standard uncertainty, half-width/√3, is the SD)",
                    self.tolerance_mv_per_cell.0, sd.0
                );
            }
            None => {
                let _ = writeln!(
                    s,
                    "Tolerance written: ±{:.1} mV per cell rectangular half-width (the base profile's)",
                    self.tolerance_mv_per_cell.0
                );
            }
        }
        for w in &self.warnings {
            let _ = writeln!(s, "warning: {w}");
        }
        s
    }
}
