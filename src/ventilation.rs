//! Battery-room ventilation by IEC 62485-2:2010.
//!
//! The standard sizes the airflow that keeps the hydrogen from charging well
//! below its lower explosive limit (4 % by volume):
//!
//! Q = 0.05 · n · I_gas · C_rt · 10⁻³ m³/h
//!
//! with n the number of cells, C_rt the rated capacity in Ah and I_gas the
//! gas-producing current in mA per Ah (REFERENCES §6, published). The constant
//! 0.05 m³/Ah is the product of the dilution factor 24 ((100 − 4) / 4, air per
//! volume of hydrogen to stay at 4 %), the hydrogen produced, 0.42·10⁻³ m³ per Ah,
//! and a safety factor of 5: 24 · 0.42·10⁻³ · 5 = 0.0504, rounded (from memory,
//! consistent with secondary summaries of the standard). For natural ventilation
//! the free opening is A = 28 · Q cm² for the inlet and the same for the outlet
//! (published); 28 is 10⁴ cm²/m² ÷ (0.1 m/s · 3600 s/h), i.e. an assumed air speed
//! of 0.1 m/s through the opening (from memory).
//!
//! This is an aid, not a design: the standard, local codes and the battery maker
//! govern.

use crate::units::AmpHours;
use serde::{Deserialize, Serialize};
use std::fmt::Write as _;
use thiserror::Error;

/// Hydrogen factor v·q·s of IEC 62485-2, m³ of air per Ah of gas-producing charge
/// (published as 0.05; composition from memory, see the module docs).
pub const AIR_PER_AH_M3: f64 = 0.05;

/// Free opening area per unit airflow for natural ventilation, cm² per m³/h
/// (IEC 62485-2, published).
pub const OPENING_CM2_PER_M3_PER_H: f64 = 28.0;

/// Largest cell count accepted: well above the largest stationary strings
/// (a 1500 V DC string is about 750 cells); more is a typing error.
pub const MAX_CELLS: u32 = 2000;

/// Largest rated capacity per cell accepted, Ah: above the largest stationary
/// lead-acid cells made (a few thousand Ah); more is a typing error.
pub const MAX_CAPACITY_AH: f64 = 50_000.0;

/// How the cells are built, which sets how much of the charge current becomes gas.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum CellType {
    /// Vented (flooded) cells, low-antimony grids.
    Vented,
    /// Valve-regulated cells (AGM or gel), which recombine most of the gas.
    Vrla,
}

/// The charge condition the airflow is sized for.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum ChargeMode {
    /// Float (standby) charge.
    Float,
    /// Boost or equalizing charge.
    Boost,
}

/// What the calculation needs.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct VentilationInput {
    /// Number of cells in the room or enclosure, every string counted (a 12 V
    /// block is 6 cells).
    pub cells: u32,
    /// Rated capacity C_rt of each cell (C10 for lead-acid).
    pub capacity: AmpHours,
    /// Vented or valve-regulated.
    pub cell_type: CellType,
    /// Float or boost charge.
    pub mode: ChargeMode,
}

/// The required ventilation, with the numbers used and the limits of the method.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct VentilationResult {
    /// Required airflow Q, m³/h.
    pub airflow_m3_per_h: f64,
    /// Natural ventilation: minimum free opening area, cm², for the inlet and the
    /// same again for the outlet.
    pub opening_area_cm2: f64,
    /// Gas-producing current used, mA per Ah of rated capacity.
    pub gas_current_ma_per_ah: f64,
    /// The formula, in symbols.
    pub formula: &'static str,
    /// Where the formula and the gas currents come from.
    pub source: &'static str,
    /// Short, labelled notes on when the result holds.
    pub validity: Vec<&'static str>,
    /// The standard, local codes and the maker govern.
    pub caution: &'static str,
    /// Echo of the input: number of cells.
    pub cells: u32,
    /// Echo of the input: rated capacity per cell.
    pub capacity: AmpHours,
    /// Echo of the input: cell type.
    pub cell_type: CellType,
    /// Echo of the input: charge mode.
    pub mode: ChargeMode,
}

/// Why a ventilation calculation was refused.
#[derive(Debug, Error, Clone, PartialEq)]
pub enum VentilationError {
    /// No cells.
    #[error(
        "ventilation: number of cells is 0; expected at least 1 cell (a 12 V block counts as 6)"
    )]
    NoCells,
    /// Implausibly many cells.
    #[error("ventilation: {cells} cells is more than the {max} accepted; expected the cell count in the room (a 12 V block counts as 6)")]
    TooManyCells {
        /// The cell count given.
        cells: u32,
        /// The largest accepted.
        max: u32,
    },
    /// The capacity is NaN or infinite.
    #[error("ventilation: rated capacity {capacity_ah} Ah is not a finite number; expected a positive capacity per cell in Ah (C10)")]
    CapacityNotFinite {
        /// The capacity given, Ah.
        capacity_ah: f64,
    },
    /// The capacity is zero or negative.
    #[error("ventilation: rated capacity {} Ah is not above 0; expected a positive capacity per cell in Ah (C10)", crate::units::Shown(*.capacity_ah))]
    CapacityNotPositive {
        /// The capacity given, Ah.
        capacity_ah: f64,
    },
    /// The capacity is implausibly large.
    #[error("ventilation: rated capacity {} Ah per cell is more than the {max_ah} Ah accepted; expected the capacity of one cell, not of the whole bank in another unit", crate::units::Shown(*.capacity_ah))]
    CapacityTooLarge {
        /// The capacity given, Ah.
        capacity_ah: f64,
        /// The largest accepted, Ah.
        max_ah: f64,
    },
}

const FORMULA: &str = "Q = 0.05 · n · I_gas · C_rt · 10⁻³ m³/h; natural ventilation A = 28 · Q cm² (inlet and outlet each)";

const SOURCE: &str = "IEC 62485-2:2010 §7: formula, I_gas table (vented 5/20, VRLA 1/8 mA per Ah float/boost) and opening area (published, REFERENCES §6)";

const CAUTION: &str = "An aid, not a design: IEC 62485-2, local codes and the battery maker's instructions govern; have a competent person design and check the ventilation.";

const VALIDITY: [&str; 7] = [
    "I_gas is the standard's table value for charging at the standard's float/boost voltages up to about 40 °C; for other voltages, temperatures or aged cells the maker's gas currents govern (from memory).",
    "Vented values assume low-antimony grids (Sb < 3 %) (from memory).",
    "n counts every cell in the room or enclosure (a 12 V block is 6 cells); C_rt is the rated capacity of each cell, C10 for lead-acid (from memory).",
    "0.05 m³/Ah = dilution 24 × 0.42·10⁻³ m³ H₂ per Ah × safety factor 5, rounded (from memory).",
    "Natural ventilation assumes an air speed of about 0.1 m/s through the openings (from memory); A applies to the inlet and again to the outlet (published).",
    "Inlet low and outlet high, on opposite walls or at least about 2 m apart on the same wall; exhaust led outdoors. If openings cannot deliver Q, use forced ventilation (from memory).",
    "Close above the cells the air can be explosive even when Q is met: no sparks or flames there (from memory).",
];

/// The gas-producing current I_gas of IEC 62485-2, mA per Ah (REFERENCES §6,
/// published): vented 5 float / 20 boost, VRLA 1 float / 8 boost.
pub fn gas_current_ma_per_ah(cell_type: CellType, mode: ChargeMode) -> f64 {
    match (cell_type, mode) {
        (CellType::Vented, ChargeMode::Float) => 5.0,
        (CellType::Vented, ChargeMode::Boost) => 20.0,
        (CellType::Vrla, ChargeMode::Float) => 1.0,
        (CellType::Vrla, ChargeMode::Boost) => 8.0,
    }
}

/// Required airflow and natural-ventilation opening for a battery room.
///
/// Refuses 0 cells, more than [`MAX_CELLS`], a capacity that is not finite, not
/// above 0 or above [`MAX_CAPACITY_AH`].
pub fn required_ventilation(
    input: &VentilationInput,
) -> Result<VentilationResult, VentilationError> {
    if input.cells == 0 {
        return Err(VentilationError::NoCells);
    }
    if input.cells > MAX_CELLS {
        return Err(VentilationError::TooManyCells {
            cells: input.cells,
            max: MAX_CELLS,
        });
    }
    let capacity_ah = input.capacity.value();
    if !capacity_ah.is_finite() {
        return Err(VentilationError::CapacityNotFinite { capacity_ah });
    }
    if capacity_ah <= 0.0 {
        return Err(VentilationError::CapacityNotPositive { capacity_ah });
    }
    if capacity_ah > MAX_CAPACITY_AH {
        return Err(VentilationError::CapacityTooLarge {
            capacity_ah,
            max_ah: MAX_CAPACITY_AH,
        });
    }
    let i_gas = gas_current_ma_per_ah(input.cell_type, input.mode);
    let airflow = AIR_PER_AH_M3 * f64::from(input.cells) * i_gas * capacity_ah * 1e-3;
    Ok(VentilationResult {
        airflow_m3_per_h: airflow,
        opening_area_cm2: OPENING_CM2_PER_M3_PER_H * airflow,
        gas_current_ma_per_ah: i_gas,
        formula: FORMULA,
        source: SOURCE,
        validity: VALIDITY.to_vec(),
        caution: CAUTION,
        cells: input.cells,
        capacity: input.capacity,
        cell_type: input.cell_type,
        mode: input.mode,
    })
}

/// A number with about four significant figures, trailing zeros dropped, so the
/// substituted formula reads like a hand calculation.
fn fmt_sig(x: f64) -> String {
    if x == 0.0 || !x.is_finite() {
        return format!("{x}");
    }
    let magnitude = x.abs().log10().floor();
    // Clamped so tiny or huge values cannot ask for absurd precision.
    let decimals = (3.0 - magnitude).clamp(0.0, 12.0) as usize;
    let s = format!("{x:.decimals$}");
    if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        s
    }
}

fn cell_type_name(t: CellType) -> &'static str {
    match t {
        CellType::Vented => "vented",
        CellType::Vrla => "VRLA",
    }
}

fn mode_name(m: ChargeMode) -> &'static str {
    match m {
        ChargeMode::Float => "float",
        ChargeMode::Boost => "boost",
    }
}

/// The result as text: inputs, the formula with the numbers put in, the result,
/// the limits of the method and the caution that the standard and local codes
/// govern.
pub fn render_text(r: &VentilationResult) -> String {
    let n = r.cells;
    let c = fmt_sig(r.capacity.value());
    let i = fmt_sig(r.gas_current_ma_per_ah);
    let q = fmt_sig(r.airflow_m3_per_h);
    let a = fmt_sig(r.opening_area_cm2);
    let mut out = String::new();
    // Writing to a String cannot fail; the results are ignored on purpose.
    let _ = writeln!(out, "Battery-room ventilation (IEC 62485-2:2010)");
    let _ = writeln!(
        out,
        "Inputs: {n} {} cells, rated capacity C_rt {c} Ah per cell, {} charge",
        cell_type_name(r.cell_type),
        mode_name(r.mode)
    );
    let _ = writeln!(
        out,
        "Gas current: I_gas = {i} mA per Ah ({}, {})",
        cell_type_name(r.cell_type),
        mode_name(r.mode)
    );
    let _ = writeln!(
        out,
        "Airflow: Q = 0.05 · n · I_gas · C_rt · 10⁻³ = 0.05 · {n} · {i} · {c} · 10⁻³ = {q} m³/h"
    );
    let _ = writeln!(
        out,
        "Natural ventilation: A = 28 · Q = 28 · {q} = {a} cm² free opening, for the inlet and the same for the outlet"
    );
    let _ = writeln!(out, "Limits:");
    for v in &r.validity {
        let _ = writeln!(out, "  - {v}");
    }
    let _ = writeln!(out, "Source: {}", r.source);
    let _ = writeln!(out, "Caution: {}", r.caution);
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    fn input(cells: u32, ah: f64, cell_type: CellType, mode: ChargeMode) -> VentilationInput {
        VentilationInput {
            cells,
            capacity: AmpHours(ah),
            cell_type,
            mode,
        }
    }

    #[test]
    fn vented_24_cells_200_ah_float() {
        // IEC 62485-2:2010 §7, REFERENCES §6 (published), by hand:
        // Q = 0.05 · 24 · 5 · 200 · 1e-3 = 1.2 m³/h; A = 28 · 1.2 = 33.6 cm².
        let r =
            required_ventilation(&input(24, 200.0, CellType::Vented, ChargeMode::Float)).unwrap();
        assert_relative_eq!(r.gas_current_ma_per_ah, 5.0);
        assert_relative_eq!(r.airflow_m3_per_h, 1.2, max_relative = 1e-12);
        assert_relative_eq!(r.opening_area_cm2, 33.6, max_relative = 1e-12);
    }

    #[test]
    fn vented_24_cells_200_ah_boost() {
        // IEC 62485-2:2010 §7, REFERENCES §6 (published), by hand:
        // Q = 0.05 · 24 · 20 · 200 · 1e-3 = 4.8 m³/h; A = 28 · 4.8 = 134.4 cm².
        let r =
            required_ventilation(&input(24, 200.0, CellType::Vented, ChargeMode::Boost)).unwrap();
        assert_relative_eq!(r.gas_current_ma_per_ah, 20.0);
        assert_relative_eq!(r.airflow_m3_per_h, 4.8, max_relative = 1e-12);
        assert_relative_eq!(r.opening_area_cm2, 134.4, max_relative = 1e-12);
    }

    #[test]
    fn vrla_24_cells_100_ah() {
        // IEC 62485-2:2010 §7, REFERENCES §6 (published), by hand:
        // float: Q = 0.05 · 24 · 1 · 100 · 1e-3 = 0.12 m³/h, A = 3.36 cm²;
        // boost: Q = 0.05 · 24 · 8 · 100 · 1e-3 = 0.96 m³/h, A = 26.88 cm².
        let f = required_ventilation(&input(24, 100.0, CellType::Vrla, ChargeMode::Float)).unwrap();
        assert_relative_eq!(f.airflow_m3_per_h, 0.12, max_relative = 1e-12);
        assert_relative_eq!(f.opening_area_cm2, 3.36, max_relative = 1e-12);
        let b = required_ventilation(&input(24, 100.0, CellType::Vrla, ChargeMode::Boost)).unwrap();
        assert_relative_eq!(b.airflow_m3_per_h, 0.96, max_relative = 1e-12);
        assert_relative_eq!(b.opening_area_cm2, 26.88, max_relative = 1e-12);
    }

    #[test]
    fn large_string_by_hand() {
        // IEC 62485-2:2010 §7 (published), by hand: 240 vented cells of 1000 Ah on boost:
        // Q = 0.05 · 240 · 20 · 1000 · 1e-3 = 240 m³/h; A = 28 · 240 = 6720 cm².
        let r =
            required_ventilation(&input(240, 1000.0, CellType::Vented, ChargeMode::Boost)).unwrap();
        assert_relative_eq!(r.airflow_m3_per_h, 240.0, max_relative = 1e-12);
        assert_relative_eq!(r.opening_area_cm2, 6720.0, max_relative = 1e-12);
    }

    #[test]
    fn constants_match_their_composition() {
        // 0.05 = 24 · 0.42e-3 · 5 = 0.0504, rounded (from memory); 24 = (100 − 4) / 4
        // from the 4 % LEL (published, REFERENCES §6).
        assert_relative_eq!((100.0 - 4.0) / 4.0, 24.0);
        let composed = 24.0 * 0.42e-3 * 5.0;
        assert!((composed - AIR_PER_AH_M3).abs() < 0.001, "{composed}");
        // 28 cm² per m³/h ≈ 1e4 / (0.1 m/s · 3600 s/h) = 27.8 (derived from the
        // 0.1 m/s air speed, from memory).
        let per_speed = 1e4 / (0.1 * 3600.0);
        assert!(
            (per_speed - OPENING_CM2_PER_M3_PER_H).abs() < 0.5,
            "{per_speed}"
        );
    }

    #[test]
    fn boost_to_float_ratio_from_table() {
        // I_gas table, REFERENCES §6 (published): vented 20/5 = 4, VRLA 8/1 = 8.
        let ratio = |t| {
            gas_current_ma_per_ah(t, ChargeMode::Boost)
                / gas_current_ma_per_ah(t, ChargeMode::Float)
        };
        assert_relative_eq!(ratio(CellType::Vented), 4.0);
        assert_relative_eq!(ratio(CellType::Vrla), 8.0);
    }

    #[test]
    fn refuses_bad_inputs() {
        let v = CellType::Vented;
        let f = ChargeMode::Float;
        assert_eq!(
            required_ventilation(&input(0, 100.0, v, f)),
            Err(VentilationError::NoCells)
        );
        assert!(matches!(
            required_ventilation(&input(MAX_CELLS + 1, 100.0, v, f)),
            Err(VentilationError::TooManyCells { .. })
        ));
        assert!(required_ventilation(&input(MAX_CELLS, 100.0, v, f)).is_ok());
        for bad in [0.0, -5.0, -0.0] {
            assert!(matches!(
                required_ventilation(&input(6, bad, v, f)),
                Err(VentilationError::CapacityNotPositive { .. })
            ));
        }
        for bad in [f64::NAN, f64::INFINITY, f64::NEG_INFINITY] {
            assert!(matches!(
                required_ventilation(&input(6, bad, v, f)),
                Err(VentilationError::CapacityNotFinite { .. })
            ));
        }
        assert!(matches!(
            required_ventilation(&input(6, 1e6, v, f)),
            Err(VentilationError::CapacityTooLarge { .. })
        ));
        let msg = VentilationError::NoCells.to_string();
        assert!(msg.contains("at least 1 cell"), "{msg}");
    }

    #[test]
    fn text_shows_substituted_formula_limits_and_caution() {
        // Numbers as in vented_24_cells_200_ah_float (IEC 62485-2:2010, published).
        let r =
            required_ventilation(&input(24, 200.0, CellType::Vented, ChargeMode::Float)).unwrap();
        let t = render_text(&r);
        assert!(t.contains("0.05 · 24 · 5 · 200 · 10⁻³ = 1.2 m³/h"), "{t}");
        assert!(t.contains("28 · 1.2 = 33.6 cm²"), "{t}");
        assert!(t.contains("24 vented cells"), "{t}");
        assert!(t.contains("0.1 m/s"), "{t}");
        assert!(t.contains("local codes"), "{t}");
        assert!(t.contains("IEC 62485-2:2010"), "{t}");
        for v in &r.validity {
            assert!(t.contains(v));
            // Every note carries a source label.
            assert!(
                v.contains("(from memory)") || v.contains("(published)"),
                "unlabelled: {v}"
            );
        }
    }

    #[test]
    fn small_results_keep_significant_figures() {
        // IEC 62485-2 (published), by hand: 6 VRLA cells of 7 Ah on float:
        // Q = 0.05 · 6 · 1 · 7 · 1e-3 = 0.0021 m³/h; A = 0.0588 cm².
        let r = required_ventilation(&input(6, 7.0, CellType::Vrla, ChargeMode::Float)).unwrap();
        let t = render_text(&r);
        assert!(t.contains("= 0.0021 m³/h"), "{t}");
        assert!(t.contains("= 0.0588 cm²"), "{t}");
    }

    #[test]
    fn serializes_with_kebab_case_enums_and_echoed_inputs() {
        let r = required_ventilation(&input(24, 100.0, CellType::Vrla, ChargeMode::Boost)).unwrap();
        let j = serde_json::to_value(&r).unwrap();
        assert_eq!(j["cell_type"], "vrla");
        assert_eq!(j["mode"], "boost");
        assert_eq!(j["cells"], 24);
        assert_eq!(j["capacity"], 100.0);
    }
}
