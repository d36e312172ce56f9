//! One string at one visit: every unit's check, the deviation from the string
//! average, the temperature spread, the float current over visits, and what
//! can (and cannot) be said about the state of charge.

use super::unit::{check_with_ambient, decide, float_section, validate};
use super::{FloatError, FloatFlag, FloatFlagCode, FloatReading};
use crate::correct::{Action, Reason};
use crate::profile::Profile;
use crate::rules::{RuleId, Rules};
use crate::safety::{cautions_for_work, Caution, WorkKind};
use crate::units::{Amperes, Celsius, Volts};
use chrono::NaiveDateTime;
use serde::Serialize;

use super::unit::UnitFloatCheck;

/// Two visits count as "at constant string voltage" when their string
/// voltages differ by no more than this. Common practice: a float charger holds
/// its setting within a fraction of a percent, so a larger change explains a
/// change in current by itself.
pub const CONSTANT_VOLTAGE_TOLERANCE_PERCENT: f64 = 0.5;

/// What one visit to a string on float shows. There is no state-of-charge
/// field, on purpose: see `state_of_charge_note`.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct StringFloatAnalysis {
    /// The string's name.
    pub string: String,
    /// Units read.
    pub units: usize,
    /// Mean of the units' float voltages per cell.
    pub average_volts_per_cell: f64,
    /// Highest minus lowest float voltage per cell.
    pub spread_volts_per_cell: f64,
    /// Hottest minus coldest unit temperature, when two or more were read.
    pub temperature_spread_c: Option<f64>,
    /// Sum of the unit voltages read at this visit (the string voltage when every unit was read).
    pub string_volts: f64,
    /// The string's float current at this visit (median of the units' entries).
    pub float_current_amperes: Option<f64>,
    /// Float current expected once fully charged: the profile's mA per Ah × capacity.
    pub expected_current_amperes: Option<f64>,
    /// Every unit's check, with the string-level `float-deviation` added.
    pub per_unit: Vec<UnitFloatCheck>,
    /// String-level flags (`temp-spread`, `thermal-runaway-risk` from a rising current).
    pub flags: Vec<FloatFlag>,
    /// The action the string-level flags call for (units have their own).
    pub action: Action,
    /// Reasons for the string-level action, most urgent first.
    pub reasons: Vec<Reason>,
    /// Cautions for all the work at this string: the string's and every unit's.
    pub cautions: Vec<Caution>,
    /// `Some(true)` when the float current has settled near the expected value
    /// over two successive visits and no unit is low; `Some(false)` when the
    /// currents were there but did not show that; `None` when they could not tell.
    pub fully_charged_on_float: Option<bool>,
    /// Units to take off float and rest-test to learn the state of charge
    /// (empty when the string is shown fully charged on float).
    pub rest_test_units: Vec<String>,
    /// What can be said about the state of charge, in words.
    pub state_of_charge_note: String,
    /// What could not be checked, and what was assumed.
    pub notes: Vec<String>,
}

impl StringFloatAnalysis {
    /// Whether a string-level flag was raised.
    pub fn has(&self, code: FloatFlagCode) -> bool {
        self.flags.iter().any(|f| f.code == code)
    }

    /// The string-level reasons that concern one unit, most urgent first:
    /// those of flags naming it (`temp-spread` names the hottest and the
    /// coldest unit), and those of flags about the whole string, which every
    /// unit shares (a rising float current calls for every unit's temperature).
    /// Empty for a unit that is not in the string.
    pub fn reasons_for_unit(&self, unit_id: &str) -> Vec<Reason> {
        if !self.per_unit.iter().any(|c| c.unit_id == unit_id) {
            return Vec::new();
        }
        let mut out: Vec<Reason> = self
            .flags
            .iter()
            .filter(|f| f.units.is_empty() || f.units.iter().any(|u| u == unit_id))
            .map(string_reason)
            .collect();
        out.sort_by_key(|r| r.action);
        out
    }
}

/// One visit's string current and voltage.
#[derive(Clone, Copy, Debug)]
struct Visit {
    at: Option<NaiveDateTime>,
    amperes: f64,
    string_volts: f64,
}

fn when(v: &Visit) -> String {
    v.at.map(|t| t.format("%Y-%m-%d %H:%M").to_string())
        .unwrap_or_else(|| "this visit".into())
}

fn median(mut xs: Vec<f64>) -> Option<f64> {
    if xs.is_empty() {
        return None;
    }
    xs.sort_by(f64::total_cmp);
    let n = xs.len();
    Some(if n % 2 == 1 {
        xs[n / 2]
    } else {
        (xs[n / 2 - 1] + xs[n / 2]) / 2.0
    })
}

/// Readings of one string at one visit (and optionally the previous visits' currents for the rising-current rule).
///
/// `previous_currents` are earlier visits' `(time, string float current,
/// string voltage)`, in any order; an entry at this visit's own time is taken
/// as this visit and skipped.
pub fn analyse_string(
    profile: &Profile,
    string: &str,
    readings: &[FloatReading],
    previous_currents: &[(NaiveDateTime, Amperes, Volts)],
    rules: &Rules,
) -> Result<StringFloatAnalysis, FloatError> {
    if readings.is_empty() {
        return Err(FloatError::EmptyString(string.to_string()));
    }
    let f = float_section(profile)?;
    for r in readings {
        if let Some(s) = &r.string {
            if s != string {
                return Err(FloatError::WrongString {
                    unit_id: r.unit_id.clone(),
                    found: s.clone(),
                    expected: string.to_string(),
                });
            }
        }
        validate(r)?;
    }
    for (at, i, v) in previous_currents {
        let label = format!("earlier visit {at}");
        if !i.is_finite() {
            return Err(FloatError::NotFinite {
                unit_id: label,
                quantity: "the float current",
            });
        }
        if !v.is_finite() {
            return Err(FloatError::NotFinite {
                unit_id: label,
                quantity: "the string voltage",
            });
        }
        if i.0 < 0.0 {
            return Err(FloatError::OutOfRange {
                unit_id: label,
                quantity: "the float current",
                value: i.0,
                expected: "a charging current of 0 A or more",
            });
        }
        if v.0 <= 0.0 {
            return Err(FloatError::OutOfRange {
                unit_id: label,
                quantity: "the string voltage",
                value: v.0,
                expected: "a positive string voltage in volts",
            });
        }
    }

    let mut notes = Vec::new();

    // A unit read without its own ambient shares the room with the others.
    let string_ambient = median(
        readings
            .iter()
            .filter_map(|r| r.ambient.map(|a| a.0))
            .collect(),
    )
    .map(Celsius);
    let mut per_unit = Vec::with_capacity(readings.len());
    for r in readings {
        let ambient = r.ambient.or(string_ambient);
        let mut c = check_with_ambient(profile, r, rules, ambient)?;
        if r.ambient.is_none() {
            if let Some(a) = string_ambient {
                c.notes.push(format!(
                    "no ambient read at this unit: the string's {:.1} °C is used",
                    a.0
                ));
            }
        }
        per_unit.push(c);
    }

    let n = per_unit.len() as f64;
    let average = per_unit.iter().map(|c| c.volts_per_cell).sum::<f64>() / n;
    let lowest = per_unit
        .iter()
        .map(|c| c.volts_per_cell)
        .fold(f64::INFINITY, f64::min);
    let highest = per_unit
        .iter()
        .map(|c| c.volts_per_cell)
        .fold(f64::NEG_INFINITY, f64::max);

    // FIST 3-6 §1.2C: a cell well below the others on float is not getting
    // its share of the charge, whatever the window says.
    let deviation = rules.get(RuleId::FloatDeviation);
    if per_unit.len() < 2 {
        notes.push("one unit only: the deviation from the string average was not checked".into());
    } else {
        for c in per_unit.iter_mut() {
            let below = average - c.volts_per_cell;
            if below > deviation {
                c.flags.push(FloatFlag {
                    code: FloatFlagCode::FloatDeviation,
                    detail: format!(
                        "{:.3} V per cell is {below:.3} V below the string average {average:.3} V per cell (limit {deviation} V)",
                        c.volts_per_cell
                    ),
                    rule: RuleId::FloatDeviation.id(),
                    source: rules.source(RuleId::FloatDeviation),
                    units: Vec::new(),
                });
                decide(profile, c);
            }
        }
    }

    let mut flags = Vec::new();

    let temps: Vec<(&str, f64)> = per_unit
        .iter()
        .filter_map(|c| c.temperature_celsius.map(|t| (c.unit_id.as_str(), t)))
        .collect();
    let temperature_spread_c = if temps.len() >= 2 {
        let hot = temps
            .iter()
            .copied()
            .fold(temps[0], |a, b| if b.1 > a.1 { b } else { a });
        let cold = temps
            .iter()
            .copied()
            .fold(temps[0], |a, b| if b.1 < a.1 { b } else { a });
        let spread = hot.1 - cold.1;
        let limit = rules.get(RuleId::TempSpread);
        if spread > limit {
            flags.push(FloatFlag {
                code: FloatFlagCode::TempSpread,
                detail: format!(
                    "unit temperatures spread {spread:.1} K, from {:.1} °C at {} to {:.1} °C at {} (limit {limit} K)",
                    cold.1, cold.0, hot.1, hot.0
                ),
                rule: RuleId::TempSpread.id(),
                source: rules.source(RuleId::TempSpread),
                units: vec![hot.0.to_string(), cold.0.to_string()],
            });
        }
        Some(spread)
    } else {
        notes.push(
            "fewer than two unit temperatures: the temperature spread was not checked".into(),
        );
        None
    };

    let string_volts: f64 = per_unit.iter().map(|c| c.volts).sum();
    let currents: Vec<f64> = readings
        .iter()
        .filter_map(|r| r.float_current.map(|i| i.0))
        .collect();
    let this_current = median(currents.clone());
    if let (Some(m), Some(lo), Some(hi)) = (
        this_current,
        currents.iter().copied().reduce(f64::min),
        currents.iter().copied().reduce(f64::max),
    ) {
        // Units in series carry one current; differing entries are typing or clamp errors.
        if hi - lo > 0.05 * m.max(1e-9) {
            notes.push(format!(
                "the units give different string currents ({lo:.3} A to {hi:.3} A): the median {m:.3} A is used"
            ));
        }
    }
    let this_time = readings.iter().filter_map(|r| r.taken_at).max();

    let mut visits: Vec<Visit> = previous_currents
        .iter()
        .filter(|(at, _, _)| Some(*at) != this_time)
        .map(|(at, i, v)| Visit {
            at: Some(*at),
            amperes: i.0,
            string_volts: v.0,
        })
        .collect();
    if let Some(i) = this_current {
        visits.push(Visit {
            at: this_time,
            amperes: i,
            string_volts,
        });
    }
    // Undated (this) visit last: it is the one being made now.
    visits.sort_by_key(|v| (v.at.is_none(), v.at));

    if let Some(flag) = rising_current(&visits, rules, &mut notes) {
        flags.push(flag);
    }

    let capacities: Vec<f64> = readings
        .iter()
        .filter_map(|r| r.capacity.map(|c| c.0))
        .collect();
    let capacity = capacities.first().copied();
    if capacities
        .iter()
        .any(|c| (c - capacity.unwrap_or(*c)).abs() > 1e-9)
    {
        notes.push(format!(
            "the units give different capacities: {} Ah is used for the expected float current",
            capacity.unwrap_or_default()
        ));
    }
    let expected = capacity.map(|c| f.expected_current_ma_per_ah.value * c / 1000.0);

    let factor = rules.get(RuleId::FloatSettledFactor);
    let any_low = per_unit
        .iter()
        .any(|c| c.has(FloatFlagCode::FloatLow) || c.has(FloatFlagCode::FloatDeviation));
    let any_runaway = flags
        .iter()
        .any(|f| f.code == FloatFlagCode::ThermalRunawayRisk)
        || per_unit
            .iter()
            .any(|c| c.has(FloatFlagCode::ThermalRunawayRisk));
    let (fully_charged_on_float, why) = match (expected, visits.len()) {
        (None, _) => (
            None,
            "no capacity given, so the expected float current is unknown".to_string(),
        ),
        (Some(e), _) if e <= 0.0 => (
            None,
            format!("profile '{}' gives no expected float current", profile.id()),
        ),
        (Some(_), k) if k < 2 => (
            None,
            "the float current of two successive visits is needed to see it settle".to_string(),
        ),
        (Some(e), k) => {
            let last_two = &visits[k - 2..];
            let (lo, hi) = (e / factor, e * factor);
            let settled = last_two.iter().all(|v| v.amperes >= lo && v.amperes <= hi);
            let currents = format!(
                "{} A at {} and {} A at {}",
                last_two[0].amperes,
                when(&last_two[0]),
                last_two[1].amperes,
                when(&last_two[1])
            );
            if !settled {
                (
                    Some(false),
                    format!(
                        "the float current ({currents}) is not within ×{factor} of the expected {e:.3} A"
                    ),
                )
            } else if any_low || any_runaway {
                (
                    Some(false),
                    format!(
                        "the float current has settled ({currents}, expected {e:.3} A) but units are low or hot, so not every unit is charged"
                    ),
                )
            } else {
                (
                    Some(true),
                    format!(
                        "the float current has settled at {currents} (expected {e:.3} A, within ×{factor}) over two successive visits"
                    ),
                )
            }
        }
    };

    // The lowest units are the likeliest to be short of charge; one in ten, at
    // least one, is the sample (common practice). Units to be replaced are not
    // tested: they leave service.
    let rest_test_units: Vec<String> = if fully_charged_on_float == Some(true) {
        Vec::new()
    } else {
        let mut by_volts: Vec<&UnitFloatCheck> = per_unit
            .iter()
            .filter(|c| c.action != Action::Replace)
            .collect();
        by_volts.sort_by(|a, b| a.volts_per_cell.total_cmp(&b.volts_per_cell));
        let sample = per_unit.len().div_ceil(10).max(1);
        let mut out: Vec<String> = by_volts
            .iter()
            .take(sample)
            .map(|c| c.unit_id.clone())
            .collect();
        for c in &by_volts {
            if !c.flags.is_empty() && !out.contains(&c.unit_id) {
                out.push(c.unit_id.clone());
            }
        }
        out
    };

    let mut state_of_charge_note = String::from(
        "State of charge cannot be read from float voltage: on charge the charger holds the voltage up, \
         whatever charge the plates hold. ",
    );
    if fully_charged_on_float == Some(true) {
        state_of_charge_note.push_str(&format!("This string is fully charged on float: {why}."));
    } else {
        state_of_charge_note.push_str(&format!("Not shown fully charged: {why}. "));
        if rest_test_units.is_empty() {
            state_of_charge_note
                .push_str("No unit to rest-test until the units marked replace are dealt with.");
        } else {
            state_of_charge_note.push_str(&format!(
                "To learn it, take these units off float and rest-test them: {}.",
                rest_test_units.join(", ")
            ));
        }
    }

    let mut reasons: Vec<Reason> = flags.iter().map(string_reason).collect();
    reasons.sort_by_key(|r| r.action);
    let action = reasons
        .first()
        .map(|r| r.action)
        .unwrap_or(Action::Serviceable);
    let mut work = action.work().to_vec();
    if flags
        .iter()
        .any(|f| f.code == FloatFlagCode::ThermalRunawayRisk)
    {
        work.push(WorkKind::HotUnit);
    }
    let mut cautions = cautions_for_work(&work);
    for c in &per_unit {
        cautions.extend(c.cautions.iter().copied());
    }
    cautions.sort();
    cautions.dedup();

    Ok(StringFloatAnalysis {
        string: string.to_string(),
        units: per_unit.len(),
        average_volts_per_cell: average,
        spread_volts_per_cell: highest - lowest,
        temperature_spread_c,
        string_volts,
        float_current_amperes: this_current,
        expected_current_amperes: expected,
        per_unit,
        flags,
        action,
        reasons,
        cautions,
        fully_charged_on_float,
        rest_test_units,
        state_of_charge_note,
        notes,
    })
}

/// The reason a string-level flag gives.
fn string_reason(flag: &FloatFlag) -> Reason {
    match flag.code {
        // At string level no unit is identified yet: finding it comes first.
        FloatFlagCode::ThermalRunawayRisk => Reason {
            action: Action::Remeasure,
            rule: flag.code.as_str().into(),
            detail: format!(
                "{}: measure every unit's temperature to find the one heating; take the string off charge if that is safe",
                flag.detail
            ),
            source: flag.source.clone(),
        },
        _ => Reason {
            action: Action::Remeasure,
            rule: flag.code.as_str().into(),
            detail: format!(
                "{}: find the cause (ventilation, heat source, a failing unit)",
                flag.detail
            ),
            source: flag.source.clone(),
        },
    }
}

/// The rising-current rule: the latest visit's current against the visit
/// before it and against the first visit of the run at the same string
/// voltage, so a fast jump and a slow creep are both caught, while a rise that
/// has since fallen back is not.
fn rising_current(visits: &[Visit], rules: &Rules, notes: &mut Vec<String>) -> Option<FloatFlag> {
    let latest = visits.last()?;
    if visits.len() < 2 {
        notes.push("one visit's float current only: the rising-current check was not made".into());
        return None;
    }
    let limit = rules.get(RuleId::FloatCurrentRise);
    let same_volts = |v: &Visit| {
        (v.string_volts - latest.string_volts).abs() / latest.string_volts * 100.0
            <= CONSTANT_VOLTAGE_TOLERANCE_PERCENT
    };
    let previous = &visits[visits.len() - 2];
    let run_start = visits[..visits.len() - 1]
        .iter()
        .rev()
        .take_while(|v| same_volts(v))
        .last();
    if !same_volts(previous) {
        notes.push(format!(
            "the string voltage changed from {:.2} V at {} to {:.2} V at {} (more than {CONSTANT_VOLTAGE_TOLERANCE_PERCENT} %): the change in float current is not judged",
            previous.string_volts,
            when(previous),
            latest.string_volts,
            when(latest)
        ));
    }
    let rise = |from: &Visit| {
        (from.amperes > 0.0).then(|| (latest.amperes - from.amperes) / from.amperes * 100.0)
    };
    let worst = [Some(previous), run_start]
        .into_iter()
        .flatten()
        .filter(|v| same_volts(v))
        .filter_map(|v| rise(v).map(|r| (v, r)))
        .filter(|(_, r)| *r > limit)
        .max_by(|a, b| a.1.total_cmp(&b.1));
    if [Some(previous), run_start]
        .into_iter()
        .flatten()
        .any(|v| v.amperes <= 0.0 && latest.amperes > 0.0)
    {
        notes.push("an earlier visit recorded 0 A: a rise from zero is not a percentage and was not judged".into());
    }
    worst.map(|(from, r)| FloatFlag {
        code: FloatFlagCode::ThermalRunawayRisk,
        detail: format!(
            "the float current rose {r:.0} %, from {} A at {} to {} A at {}, at the same string voltage ({:.2} V, within {CONSTANT_VOLTAGE_TOLERANCE_PERCENT} %; limit {limit} %), unless the string was discharged in between",
            from.amperes,
            when(from),
            latest.amperes,
            when(latest),
            latest.string_volts
        ),
        rule: RuleId::FloatCurrentRise.id(),
        source: rules.source(RuleId::FloatCurrentRise),
        units: Vec::new(),
    })
}
