//! The TOML form of a profile, exactly as written in `profiles/*.toml`.
//!
//! Every number carries its own `source` note, so that `profiles show` can say
//! where each value comes from (a standard, a handbook, a derivation, common
//! practice, or memory). Unknown keys are refused so that a typo is not
//! silently ignored.

use serde::{Deserialize, Serialize};

/// A value with the note saying where it comes from.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Sourced<T> {
    /// The value, in the unit the key's name states.
    pub value: T,
    /// Where the value comes from: "published: …", "derived: …", "common practice", "from memory".
    pub source: String,
}

/// Chemistry family of a lead-acid battery.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Family {
    /// Vented (wet, flooded) cells with free liquid electrolyte.
    Flooded,
    /// Enhanced flooded battery: vented, with additives and a scrim for cycling.
    Efb,
    /// Valve-regulated, electrolyte absorbed in glass mat.
    Agm,
    /// Valve-regulated, gelled electrolyte.
    Gel,
}

impl Family {
    /// Valve-regulated types cannot have their electrolyte sampled.
    pub fn valve_regulated(self) -> bool {
        matches!(self, Family::Agm | Family::Gel)
    }
    /// The family's name as written in profiles.
    pub fn as_str(self) -> &'static str {
        match self {
            Family::Flooded => "flooded",
            Family::Efb => "efb",
            Family::Agm => "agm",
            Family::Gel => "gel",
        }
    }
}

/// The whole profile file.
#[derive(Clone, Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ProfileFile {
    /// Identifier used on the command line and in fleet files (lower-case, hyphens).
    pub id: String,
    /// Human-readable name.
    pub name: String,
    /// One or two sentences on what batteries this fits.
    pub description: String,
    /// Chemistry family.
    pub family: Family,
    /// Cells in series in one unit (monobloc or cell).
    pub cells: Sourced<u32>,
    /// Whether the maker's practice allows an equalizing charge.
    pub equalize_allowed: Sourced<bool>,
    /// Electrolyte specific gravities (SG 25/25).
    pub electrolyte: ElectrolyteSection,
    /// The rest-voltage curve.
    pub curve: CurveSection,
    /// Temperature coefficient of the rest voltage.
    pub temperature: TemperatureSection,
    /// Rest rules.
    pub rest: RestSection,
    /// Action thresholds.
    pub thresholds: ThresholdSection,
    /// How far real units of this type spread around the curve.
    pub tolerance: ToleranceSection,
    /// Self-discharge while standing, for fleet trends.
    pub self_discharge: SelfDischargeSection,
    /// Float-charge data, where the profile has it.
    #[serde(default)]
    pub float: Option<FloatSection>,
    /// Provenance lines (for calibrated profiles: input file, hash, date, base profile).
    #[serde(default)]
    pub provenance: Vec<String>,
}

/// Electrolyte specific gravity at full charge and fully discharged, SG 25/25.
#[derive(Clone, Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ElectrolyteSection {
    /// SG 25/25 at full charge.
    pub full_charge_sg: Sourced<f64>,
    /// SG 25/25 when fully discharged (0 % state of charge).
    pub discharged_sg: Sourced<f64>,
}

/// How the curve is defined.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum CurveKind {
    /// From the electrolyte: SG linear in state of charge, then SG → molality → cell OCV.
    Derived,
    /// Explicit `(soc_percent, volts_per_cell)` points at 25 °C.
    Points,
}

/// The rest-voltage curve section.
#[derive(Clone, Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CurveSection {
    /// Derived or explicit points.
    pub kind: CurveKind,
    /// `[soc_percent, volts_per_cell_at_25c]` pairs, for `kind = "points"`.
    #[serde(default)]
    pub points: Vec<[f64; 2]>,
    /// Where the curve comes from.
    pub source: String,
}

/// How the OCV temperature coefficient is obtained.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum CoefficientKind {
    /// dE/dT from the electrolyte at the molality of each state of charge.
    Electrolyte,
    /// A fixed value in mV/K per cell.
    Fixed,
}

/// Temperature section.
#[derive(Clone, Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TemperatureSection {
    /// Electrolyte or fixed.
    pub coefficient: CoefficientKind,
    /// The fixed coefficient, mV per K per cell (positive: OCV rises with temperature).
    #[serde(default)]
    pub ocv_mv_per_k_per_cell: Option<Sourced<f64>>,
    /// Where the choice comes from.
    pub source: String,
}

/// Rest rules.
#[derive(Clone, Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RestSection {
    /// Below this rest a reading is flagged `short-rest`.
    pub minimum_hours: Sourced<f64>,
    /// Rest after which a reading is taken as settled.
    pub preferred_hours: Sourced<f64>,
    /// A rest voltage is steady when it changes by less than this.
    pub settling_limit_mv_per_h: Sourced<f64>,
    /// How far above its rested value a reading stands one hour after a charge.
    pub surface_charge_mv_per_cell_at_1h: Sourced<f64>,
    /// How far below its rested value a reading stands one hour after a discharge.
    pub recovery_mv_per_cell_at_1h: Sourced<f64>,
}

/// Action thresholds.
#[derive(Clone, Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ThresholdSection {
    /// Recharge below this state of charge.
    pub recharge_below_soc_percent: Sourced<f64>,
    /// Recharge at once below this state of charge.
    pub urgent_below_soc_percent: Sourced<f64>,
    /// How far above the full-charge OCV a rested reading may be before `beyond-full`.
    pub beyond_full_allowance_mv_per_cell: Sourced<f64>,
}

/// Curve tolerance.
#[derive(Clone, Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ToleranceSection {
    /// Half-width of the band real units of this type spread in around the curve (rectangular).
    pub curve_mv_per_cell: Sourced<f64>,
}

/// Self-discharge.
#[derive(Clone, Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SelfDischargeSection {
    /// Expected loss of state of charge per 30 days standing at 25 °C.
    pub soc_percent_per_30_days_at_25c: Sourced<f64>,
}

/// Float-charge data.
#[derive(Clone, Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FloatSection {
    /// Lowest float voltage per cell at 25 °C.
    pub window_low_volts_per_cell: Sourced<f64>,
    /// Highest float voltage per cell at 25 °C.
    pub window_high_volts_per_cell: Sourced<f64>,
    /// Below this per-cell float voltage the cell is undercharged.
    pub minimum_volts_per_cell: Sourced<f64>,
    /// Float temperature compensation, mV per °C per cell (negative: lower float when warmer).
    pub compensation_mv_per_k_per_cell: Sourced<f64>,
    /// Compensation stops changing above this temperature.
    pub compensation_max_celsius: Sourced<f64>,
    /// Compensation stops changing below this temperature.
    pub compensation_min_celsius: Sourced<f64>,
    /// Expected float current per Ah of capacity once fully charged, mA/Ah.
    pub expected_current_ma_per_ah: Sourced<f64>,
}
