//! One unit on float: its voltage against the compensated window and the
//! minimum, and (for VRLA) its temperature against ambient.

use super::window::{compensated_minimum, compensated_window, compensation_temperature};
use super::{no_float_section, FloatError, FloatFlag, FloatFlagCode, FloatReading};
use crate::correct::{Action, Reason};
use crate::profile::schema::FloatSection;
use crate::profile::Profile;
use crate::rules::{RuleId, Rules};
use crate::safety::{cautions_for_work, Caution, WorkKind};
use crate::units::Celsius;
use serde::Serialize;

/// The verdict on one unit on float. It has no state of charge, on purpose:
/// a float voltage does not give one.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct UnitFloatCheck {
    /// The unit's identifier.
    pub unit_id: String,
    /// Its string, as read.
    pub string: Option<String>,
    /// Its position in the string, as read.
    pub position: Option<u32>,
    /// Profile used.
    pub profile: String,
    /// Cells in series in the unit.
    pub cells: u32,
    /// Float voltage across the unit.
    pub volts: f64,
    /// The same per cell.
    pub volts_per_cell: f64,
    /// Unit temperature as read.
    pub temperature_celsius: Option<f64>,
    /// Ambient used for the over-ambient check (as read, or the string's for `analyse_string`).
    pub ambient_celsius: Option<f64>,
    /// Temperature the window was compensated at (after clamping to the profile's range).
    pub compensation_celsius: f64,
    /// Compensated float window, volts per cell `[low, high]`.
    pub window_volts_per_cell: [f64; 2],
    /// Compensated minimum float, volts per cell.
    pub minimum_volts_per_cell: f64,
    /// Flags raised.
    pub flags: Vec<FloatFlag>,
    /// Recommended action.
    pub action: Action,
    /// Reasons, most urgent first; the first one's action is the action.
    pub reasons: Vec<Reason>,
    /// Cautions for the work the action involves.
    pub cautions: Vec<Caution>,
    /// What could not be checked, and what was assumed.
    pub notes: Vec<String>,
}

impl UnitFloatCheck {
    /// Whether a flag was raised.
    pub fn has(&self, code: FloatFlagCode) -> bool {
        self.flags.iter().any(|f| f.code == code)
    }
}

/// Check one unit on float by hand (`check --float`): outside the compensated
/// window → `float-low`/`float-high`; below the profile's minimum float →
/// `float-low`; a VRLA unit more than the rule's kelvins above ambient →
/// `thermal-runaway-risk`.
pub fn check_unit(
    profile: &Profile,
    r: &FloatReading,
    rules: &Rules,
) -> Result<UnitFloatCheck, FloatError> {
    check_with_ambient(profile, r, rules, r.ambient)
}

pub(super) fn float_section(profile: &Profile) -> Result<&FloatSection, FloatError> {
    profile
        .spec
        .float
        .as_ref()
        .ok_or_else(|| no_float_section(profile.id()))
}

pub(super) fn validate(r: &FloatReading) -> Result<(), FloatError> {
    let not_finite = |quantity| FloatError::NotFinite {
        unit_id: r.unit_id.clone(),
        quantity,
    };
    let out_of_range = |quantity, value, expected| FloatError::OutOfRange {
        unit_id: r.unit_id.clone(),
        quantity,
        value,
        expected,
    };
    if r.cells == 0 {
        return Err(FloatError::NoCells {
            unit_id: r.unit_id.clone(),
        });
    }
    if !r.volts.is_finite() {
        return Err(not_finite("the float voltage"));
    }
    if r.volts.0 <= 0.0 {
        return Err(out_of_range(
            "the float voltage",
            r.volts.0,
            "a positive voltage in volts (a negative one means the leads are reversed)",
        ));
    }
    for (t, name) in [
        (r.temperature, "the temperature"),
        (r.ambient, "the ambient"),
    ] {
        if let Some(t) = t {
            if !t.is_finite() {
                return Err(not_finite(name));
            }
            // Below absolute zero is a typing error, not a battery.
            if t.0 < -273.15 {
                return Err(out_of_range(name, t.0, "a temperature above −273.15 °C"));
            }
        }
    }
    if let Some(i) = r.float_current {
        if !i.is_finite() {
            return Err(not_finite("the float current"));
        }
        if i.0 < 0.0 {
            return Err(out_of_range(
                "the float current",
                i.0,
                "a charging current of 0 A or more (a negative one is a discharge or a reversed clamp)",
            ));
        }
    }
    if let Some(c) = r.capacity {
        if !c.is_finite() {
            return Err(not_finite("the capacity"));
        }
        if c.0 <= 0.0 {
            return Err(out_of_range(
                "the capacity",
                c.0,
                "a rated capacity above 0 Ah",
            ));
        }
    }
    Ok(())
}

/// `check_unit` with the ambient to compare against given separately, so a
/// string analysis can lend a unit without its own ambient the string's.
pub(super) fn check_with_ambient(
    profile: &Profile,
    r: &FloatReading,
    rules: &Rules,
    ambient: Option<Celsius>,
) -> Result<UnitFloatCheck, FloatError> {
    let f = float_section(profile)?;
    validate(r)?;
    let mut notes = Vec::new();
    let vpc = r.volts.0 / f64::from(r.cells);

    // The charger's compensation probe sits on the battery; the unit's own
    // temperature is the best stand-in, the room's the next.
    let t = match (r.temperature, r.ambient) {
        (Some(t), _) => t,
        (None, Some(a)) => {
            notes.push(format!(
                "no unit temperature: the window is compensated at the ambient {:.1} °C",
                a.0
            ));
            a
        }
        (None, None) => {
            notes.push("no temperature: the window is taken at 25 °C, uncompensated".into());
            Celsius(25.0)
        }
    };
    let tc = compensation_temperature(f, t);
    if tc.0 != t.0 {
        notes.push(format!(
            "{:.1} °C is outside the compensation range {}–{} °C: the window stops at its {:.1} °C values",
            t.0, f.compensation_min_celsius.value, f.compensation_max_celsius.value, tc.0
        ));
    }
    let (lo, hi) = compensated_window(f, t);
    let min = compensated_minimum(f, t);

    let mut flags = Vec::new();
    let reading = format!(
        "{vpc:.3} V per cell ({:.2} V over {} cell{})",
        r.volts.0,
        r.cells,
        if r.cells == 1 { "" } else { "s" }
    );
    // A per-cell value far outside any lead-acid float range means the cell
    // count or the leads are wrong rather than the unit.
    let implausible = !(1.9..=2.6).contains(&vpc);
    let hint = if implausible {
        "; far outside any lead-acid float voltage: check the cell count and the leads"
    } else {
        ""
    };
    if vpc < min.0 {
        flags.push(FloatFlag {
            code: FloatFlagCode::FloatLow,
            detail: format!(
                "{reading} is below the minimum float {:.3} V per cell at {:.1} °C: undercharged{hint}",
                min.0, tc.0
            ),
            rule: "float-minimum",
            source: f.minimum_volts_per_cell.source.clone(),
            units: Vec::new(),
        });
    } else if vpc < lo.0 {
        flags.push(FloatFlag {
            code: FloatFlagCode::FloatLow,
            detail: format!(
                "{reading} is below the float window {:.3}–{:.3} V per cell at {:.1} °C{hint}",
                lo.0, hi.0, tc.0
            ),
            rule: "float-window",
            source: f.window_low_volts_per_cell.source.clone(),
            units: Vec::new(),
        });
    } else if vpc > hi.0 {
        flags.push(FloatFlag {
            code: FloatFlagCode::FloatHigh,
            detail: format!(
                "{reading} is above the float window {:.3}–{:.3} V per cell at {:.1} °C{hint}",
                lo.0, hi.0, tc.0
            ),
            rule: "float-window",
            source: f.window_high_volts_per_cell.source.clone(),
            units: Vec::new(),
        });
    }

    if profile.family().valve_regulated() {
        match (r.temperature, ambient) {
            (Some(t), Some(a)) => {
                let over = t.0 - a.0;
                let limit = rules.get(RuleId::VrlaOverAmbient);
                if over > limit {
                    flags.push(FloatFlag {
                        code: FloatFlagCode::ThermalRunawayRisk,
                        detail: format!(
                            "VRLA unit at {:.1} °C is {over:.1} K above the ambient {:.1} °C (limit {limit} K)",
                            t.0, a.0
                        ),
                        rule: RuleId::VrlaOverAmbient.id(),
                        source: rules.source(RuleId::VrlaOverAmbient),
                        units: Vec::new(),
                    });
                }
            }
            (Some(_), None) => notes.push(
                "no ambient temperature: the VRLA over-ambient (thermal runaway) check was not made"
                    .into(),
            ),
            (None, _) => notes.push(
                "no unit temperature: the VRLA over-ambient (thermal runaway) check was not made"
                    .into(),
            ),
        }
    }

    let mut check = UnitFloatCheck {
        unit_id: r.unit_id.clone(),
        string: r.string.clone(),
        position: r.position,
        profile: profile.id().to_string(),
        cells: r.cells,
        volts: r.volts.0,
        volts_per_cell: vpc,
        temperature_celsius: r.temperature.map(|t| t.0),
        ambient_celsius: ambient.map(|a| a.0),
        compensation_celsius: tc.0,
        window_volts_per_cell: [lo.0, hi.0],
        minimum_volts_per_cell: min.0,
        flags,
        action: Action::Serviceable,
        reasons: Vec::new(),
        cautions: Vec::new(),
        notes,
    };
    decide(profile, &mut check);
    Ok(check)
}

/// Why a thermal-runaway unit is replaced rather than watched.
pub(super) const RUNAWAY_REPLACE_SOURCE: &str =
    "the warning: published, VRLA makers' manuals (REFERENCES §5); \
     removal from service: common practice (a VRLA unit that has run hot has lost water it cannot \
     get back, and cannot be restored)";

/// The action for a flag, and the source of that choice. This is the one
/// place the float flags map to actions:
/// - `thermal-runaway-risk` → replace: take the unit out of service;
/// - `float-low`, `float-deviation` → equalize where the profile allows it
///   (FIST 3-6 §1.2C), else a capacity test to learn whether the unit still holds its charge;
/// - `float-high` → remeasure: check the charger setting and the neighbours;
/// - `temp-spread` → remeasure: find the cause (ventilation, a heater, a failing unit).
pub(super) fn action_for(profile: &Profile, flag: &FloatFlag) -> (Action, String, String) {
    match flag.code {
        FloatFlagCode::ThermalRunawayRisk => (
            Action::Replace,
            format!(
                "{}: take it off charge if that is safe, let it cool and replace it",
                flag.detail
            ),
            RUNAWAY_REPLACE_SOURCE.to_string(),
        ),
        FloatFlagCode::FloatLow | FloatFlagCode::FloatDeviation => {
            if profile.spec.equalize_allowed.value {
                (
                    Action::Equalize,
                    format!("{}: give an equalizing charge", flag.detail),
                    format!(
                        "{}; equalizing: {}",
                        flag.source, profile.spec.equalize_allowed.source
                    ),
                )
            } else {
                (
                    Action::CapacityTest,
                    format!(
                        "{}: the profile does not allow equalizing, so test its capacity",
                        flag.detail
                    ),
                    format!(
                        "{}; no equalizing: {}",
                        flag.source, profile.spec.equalize_allowed.source
                    ),
                )
            }
        }
        FloatFlagCode::FloatHigh => (
            Action::Remeasure,
            format!(
                "{}: check the charger's float setting and the units beside it",
                flag.detail
            ),
            format!("{}; the check: common practice", flag.source),
        ),
        FloatFlagCode::TempSpread => (
            Action::Remeasure,
            format!(
                "{}: find the cause (ventilation, heat source, a failing unit)",
                flag.detail
            ),
            flag.source.clone(),
        ),
    }
}

/// Set the action, reasons and cautions from the flags.
pub(super) fn decide(profile: &Profile, check: &mut UnitFloatCheck) {
    let mut reasons: Vec<Reason> = check
        .flags
        .iter()
        .map(|flag| {
            let (action, detail, source) = action_for(profile, flag);
            Reason {
                action,
                rule: flag.code.as_str().to_string(),
                detail,
                source,
            }
        })
        .collect();
    if reasons.is_empty() {
        reasons.push(Reason {
            action: Action::Serviceable,
            rule: "float-window".into(),
            detail: format!(
                "{:.3} V per cell is within the float window {:.3}–{:.3} V per cell at {:.1} °C",
                check.volts_per_cell,
                check.window_volts_per_cell[0],
                check.window_volts_per_cell[1],
                check.compensation_celsius
            ),
            source: profile
                .spec
                .float
                .as_ref()
                .map(|f| f.window_low_volts_per_cell.source.clone())
                .unwrap_or_default(),
        });
    }
    reasons.sort_by_key(|r| r.action);
    check.action = reasons
        .first()
        .map(|r| r.action)
        .unwrap_or(Action::Serviceable);
    check.reasons = reasons;
    let mut work = check.action.work().to_vec();
    if check.has(FloatFlagCode::ThermalRunawayRisk) {
        work.push(WorkKind::HotUnit);
    }
    check.cautions = cautions_for_work(&work);
}
