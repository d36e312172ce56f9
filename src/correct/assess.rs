//! The corrector: one reading of one unit → an [`Assessment`].

use super::rest::{assess_rest, After, RestAssessment, RestStatus};
use super::uncertainty::{rectangular, root_sum_of_squares, Budget, Contribution, COVERAGE_FACTOR};
use crate::electrolyte::{self, ElectrolyteError, HydrometerRule};
use crate::profile::Profile;
use crate::rules::{RuleId, Rules};
use crate::safety::{cautions_for_work, Caution, WorkKind};
use crate::units::{
    shown_beside, Celsius, Hours, Kelvins, MeterAccuracy, SocPercent, SpecificGravity, Volts, Whole,
};
use serde::Serialize;

/// One reading of one unit.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Reading {
    /// Rest voltage across the unit's terminals.
    pub volts: Option<Volts>,
    /// Hydrometer readings as read (not temperature-corrected): one per cell, or one mean value.
    pub sg: Vec<SpecificGravity>,
    /// Cells in series; the profile's default when `None`.
    pub cells: Option<u32>,
    /// Battery (electrolyte) temperature; 25 °C with a wide uncertainty when `None`.
    pub temperature: Option<Celsius>,
    /// Hours since the last charge or discharge; `None` when unknown.
    pub rest: Option<Hours>,
    /// What came before the rest.
    pub after: After,
}

/// How the reading was taken, and what is expected next.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Setup {
    /// Meter accuracy.
    pub meter: MeterAccuracy,
    /// Meter display resolution.
    pub resolution: Volts,
    /// Standard uncertainty of the temperature; the rules table's default when `None`.
    pub temperature_uncertainty: Option<Kelvins>,
    /// Hydrometer temperature-correction rule.
    pub hydrometer_rule: HydrometerRule,
    /// Coldest temperature expected before the next visit.
    pub min_temperature: Option<Celsius>,
}

/// Default meter: ±(0.5 % + 2 counts) at 10 mV resolution (REFERENCES §7's example handheld meter).
pub const DEFAULT_METER: MeterAccuracy = MeterAccuracy {
    percent_of_reading: 0.5,
    counts: 2.0,
};
/// Default display resolution, volts.
pub const DEFAULT_RESOLUTION: Volts = Volts(0.01);

impl Default for Setup {
    fn default() -> Setup {
        Setup {
            meter: DEFAULT_METER,
            resolution: DEFAULT_RESOLUTION,
            temperature_uncertainty: None,
            hydrometer_rule: HydrometerRule::default(),
            min_temperature: None,
        }
    }
}

/// A plausibility or condition flag.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum FlagCode {
    /// Rest shorter than the profile's minimum.
    ShortRest,
    /// Rest time not given.
    UnknownRest,
    /// Above the full-charge voltage by more than the allowance.
    BeyondFull,
    /// Deeply discharged.
    DeepDischarge,
    /// The voltage fits one cell fewer at a plausible charge.
    SuspectShortedCell,
    /// The voltage fits another cell count far better.
    WrongCellCount,
    /// Not a battery voltage: leads, polarity, contact.
    CheckConnection,
    /// Hydrometer and voltmeter disagree beyond their uncertainties.
    SgVoltsDisagree,
    /// A cell's SG is low against the others.
    LowCellSg,
    /// Cell-to-cell SG spread too wide.
    SgSpread,
    /// Near the electrolyte's freezing point.
    FreezeRisk,
    /// The reading lay beyond an end of the curve; the state of charge is clamped.
    BeyondCurve,
    /// No temperature given: 25 °C assumed with a wide uncertainty.
    NoTemperature,
    /// A temperature outside a model's published range: results extrapolated.
    Extrapolated,
}

impl FlagCode {
    /// Flags that say the voltage does not measure the unit's charge at all
    /// (a probe off the post, the wrong cell count, a shorted cell): its state
    /// of charge, if any, comes from the hydrometer alone.
    pub const DISCREDIT_VOLTAGE: [FlagCode; 3] = [
        FlagCode::CheckConnection,
        FlagCode::WrongCellCount,
        FlagCode::SuspectShortedCell,
    ];

    /// The code as printed.
    pub fn as_str(self) -> &'static str {
        match self {
            FlagCode::ShortRest => "short-rest",
            FlagCode::UnknownRest => "unknown-rest",
            FlagCode::BeyondFull => "beyond-full",
            FlagCode::DeepDischarge => "deep-discharge",
            FlagCode::SuspectShortedCell => "suspect-shorted-cell",
            FlagCode::WrongCellCount => "wrong-cell-count",
            FlagCode::CheckConnection => "check-connection",
            FlagCode::SgVoltsDisagree => "sg-volts-disagree",
            FlagCode::LowCellSg => "low-cell-sg",
            FlagCode::SgSpread => "sg-spread",
            FlagCode::FreezeRisk => "freeze-risk",
            FlagCode::BeyondCurve => "beyond-curve",
            FlagCode::NoTemperature => "no-temperature",
            FlagCode::Extrapolated => "extrapolated",
        }
    }
}

/// The flag codes of an [`Estimate`], in the order raised, held inline: a
/// fleet makes one for every reading, and a `Vec` cost it an allocation
/// whenever a reading raised any flag. It reads as a slice of codes
/// (`contains`, `iter`, `len`, indexing) and compares with a `Vec` of them.
#[derive(Clone, Copy, PartialEq, Eq, Hash)]
pub struct FlagCodes {
    codes: [FlagCode; FlagCodes::CAPACITY],
    len: u8,
}

impl FlagCodes {
    /// More than there are codes: an assessment raises each code at most once.
    const CAPACITY: usize = 16;

    fn new() -> FlagCodes {
        FlagCodes {
            codes: [FlagCode::ShortRest; FlagCodes::CAPACITY],
            len: 0,
        }
    }

    fn push(&mut self, code: FlagCode) {
        // Never full (see CAPACITY); were it, a repeated code is what would be lost.
        if let Some(slot) = self.codes.get_mut(usize::from(self.len)) {
            *slot = code;
            self.len += 1;
        }
    }
}

impl Default for FlagCodes {
    fn default() -> FlagCodes {
        FlagCodes::new()
    }
}

impl std::ops::Deref for FlagCodes {
    type Target = [FlagCode];

    fn deref(&self) -> &[FlagCode] {
        &self.codes[..usize::from(self.len)]
    }
}

impl std::fmt::Debug for FlagCodes {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_list().entries(self.iter()).finish()
    }
}

impl PartialEq<Vec<FlagCode>> for FlagCodes {
    fn eq(&self, other: &Vec<FlagCode>) -> bool {
        **self == **other
    }
}

impl PartialEq<FlagCodes> for Vec<FlagCode> {
    fn eq(&self, other: &FlagCodes) -> bool {
        **self == **other
    }
}

impl From<FlagCodes> for Vec<FlagCode> {
    fn from(codes: FlagCodes) -> Vec<FlagCode> {
        codes.to_vec()
    }
}

/// A flag with the evidence.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Flag {
    /// The code.
    pub code: FlagCode,
    /// The evidence in words and numbers.
    pub detail: String,
}

/// Flags as an assessment raises them. When only the numbers are wanted
/// (every reading of a fleet) the evidence text is not written at all, and
/// only the codes are kept, so that [`estimate`] hands them over as they are
/// instead of copying them out of a list of [`Flag`]s.
struct Flags {
    /// The codes raised, without words.
    codes: FlagCodes,
    /// The flags raised, with words.
    list: Vec<Flag>,
    words: bool,
    /// Whether the uncertainty budget is written out too.
    budget_words: bool,
    /// Whether the state of charge's interval is worked out (and with it
    /// every flag that depends on it).
    intervals: bool,
}

/// How much of an assessment is written in words.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Words {
    /// The state of charge only, without its interval, and of the flags
    /// only those that discredit the voltage ([`estimate_charge`]).
    Charge,
    /// Numbers and flag codes only ([`estimate`]).
    Numbers,
    /// Flags with their evidence and the reasons, no written budget
    /// ([`assess_without_budget`]).
    Evidence,
    /// Everything ([`assess`]).
    Full,
}

impl Flags {
    fn new(words: Words) -> Flags {
        Flags {
            codes: FlagCodes::new(),
            list: Vec::new(),
            words: !matches!(words, Words::Numbers | Words::Charge),
            budget_words: words == Words::Full,
            intervals: words != Words::Charge,
        }
    }

    fn add(&mut self, code: FlagCode, detail: impl FnOnce() -> String) {
        if self.words {
            self.list.push(Flag {
                code,
                detail: detail(),
            });
        } else {
            self.codes.push(code);
        }
    }

    fn has(&self, code: FlagCode) -> bool {
        if self.words {
            self.list.iter().any(|f| f.code == code)
        } else {
            self.codes.contains(&code)
        }
    }
}

/// What to do with the unit. Declared most urgent first: the derived order is the precedence.
#[derive(
    Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, serde::Deserialize,
)]
#[serde(rename_all = "kebab-case")]
pub enum Action {
    /// Take out of service and replace.
    Replace,
    /// Charge today: deeply discharged, or at risk of freezing.
    RechargeNow,
    /// The reading cannot be trusted: measure again (after rest, or with the leads checked).
    Remeasure,
    /// Give a controlled equalizing charge (flooded types whose maker allows it).
    Equalize,
    /// Run a capacity (discharge) test to know the real capacity.
    CapacityTest,
    /// Charge at the next opportunity.
    Recharge,
    /// Nothing to do: leave in service.
    Serviceable,
}

impl Action {
    /// Every action, most urgent first.
    pub const ALL: [Action; 7] = [
        Action::Replace,
        Action::RechargeNow,
        Action::Remeasure,
        Action::Equalize,
        Action::CapacityTest,
        Action::Recharge,
        Action::Serviceable,
    ];
    /// The action's word.
    pub fn as_str(self) -> &'static str {
        match self {
            Action::Replace => "replace",
            Action::RechargeNow => "recharge-now",
            Action::Remeasure => "remeasure",
            Action::Equalize => "equalize",
            Action::CapacityTest => "capacity-test",
            Action::Recharge => "recharge",
            Action::Serviceable => "serviceable",
        }
    }
    /// One line of meaning.
    pub fn meaning(self) -> &'static str {
        match self {
            Action::Replace => "take the unit out of service and replace it",
            Action::RechargeNow => "charge today: deeply discharged or at risk of freezing",
            Action::Remeasure => {
                "the reading cannot be trusted: rest, check the leads and measure again"
            }
            Action::Equalize => "give a controlled equalizing charge, where the maker allows it",
            Action::CapacityTest => "run a capacity test to learn the unit's real capacity",
            Action::Recharge => "charge at the next opportunity",
            Action::Serviceable => "leave in service; nothing to do",
        }
    }
    /// The kinds of work the action involves, for cautions.
    pub fn work(self) -> &'static [WorkKind] {
        match self {
            Action::Replace => &[WorkKind::Replace],
            Action::RechargeNow | Action::Recharge => &[WorkKind::Charge],
            Action::Remeasure | Action::Serviceable => &[WorkKind::Measure],
            Action::Equalize => &[WorkKind::Equalize],
            Action::CapacityTest => &[WorkKind::CapacityTest],
        }
    }
}

/// Why an action was chosen: a rule, the evidence and the rule's source.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Reason {
    /// The action this reason calls for.
    pub action: Action,
    /// Rule id (a flag code or a rules-table id).
    pub rule: String,
    /// Evidence in words and numbers.
    pub detail: String,
    /// Where the rule comes from.
    pub source: String,
}

/// Summary of a set of hydrometer readings.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct SgSummary {
    /// Each cell's SG corrected to 25 °C (SG 25/25).
    pub per_cell_25c: Vec<f64>,
    /// Mean SG 25/25.
    pub mean_25c: f64,
    /// Highest minus lowest, 0 with one value.
    pub spread: f64,
    /// 1-based numbers of the low cells.
    pub low_cells: Vec<usize>,
    /// State of charge from the mean SG.
    pub soc_percent: f64,
    /// Its 95 % interval.
    pub soc_interval_percent: [f64; 2],
}

/// Everything restvolt concludes from one reading.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Assessment {
    /// Profile used.
    pub profile: String,
    /// Cells in series used.
    pub cells: u32,
    /// State of charge.
    pub soc_percent: f64,
    /// 95 % interval (k = 2), clamped to 0–100.
    pub soc_interval_percent: [f64; 2],
    /// What the state of charge rests on: "volts", "sg" or "volts+sg".
    pub soc_basis: &'static str,
    /// Equilibrium OCV of the unit referred to 25 °C.
    pub ocv_25c_volts: Option<f64>,
    /// The same per cell.
    pub ocv_per_cell_25c_volts: Option<f64>,
    /// Temperature correction applied to the unit voltage, mV (added to the reading).
    pub temperature_correction_mv: Option<f64>,
    /// Temperature used.
    pub temperature_celsius: f64,
    /// Rest verdict.
    pub rest: RestAssessment,
    /// Flags.
    pub flags: Vec<Flag>,
    /// Recommended action.
    pub action: Action,
    /// Reasons, most urgent first; the first one's action is the action.
    pub reasons: Vec<Reason>,
    /// Electrolyte freezing point at this state of charge; when the charge is
    /// not known ([`Assessment::charge_unknown`]), a flat battery's.
    pub freezing_point_celsius: Option<f64>,
    /// Cautions for the work the action involves.
    pub cautions: Vec<Caution>,
    /// Hydrometer summary when SG was given.
    pub sg: Option<SgSummary>,
    /// Uncertainty budget of the voltage path.
    pub budget: Option<Budget>,
}

impl Assessment {
    /// Whether a flag was raised.
    pub fn has(&self, code: FlagCode) -> bool {
        self.flags.iter().any(|f| f.code == code)
    }

    /// Whether a [`FlagCode::DISCREDIT_VOLTAGE`] flag was raised.
    pub fn voltage_discredited(&self) -> bool {
        FlagCode::DISCREDIT_VOLTAGE.into_iter().any(|c| self.has(c))
    }

    /// Whether the reading says nothing of the unit's charge, though
    /// [`Assessment::soc_percent`] holds a number: with a cell shorted the
    /// voltage lies below the curve for the whole unit (a 0 % would read as a
    /// flat battery; the flag's detail gives the charge of the cells left),
    /// and a voltage that no cell count explains (a probe off the post, the
    /// wrong battery) says nothing either, unless a hydrometer reading gave
    /// the charge.
    pub fn charge_unknown(&self) -> bool {
        charge_unknown(self.soc_basis, |c| self.has(c))
    }
}

/// [`Assessment::charge_unknown`] from the basis of the charge and the flags
/// raised (`has`), for the assessment and for the corrector's own freeze check.
fn charge_unknown(basis: &str, has: impl Fn(FlagCode) -> bool) -> bool {
    has(FlagCode::SuspectShortedCell)
        || (basis == "volts" && FlagCode::DISCREDIT_VOLTAGE.into_iter().any(has))
}

/// A reading that cannot be assessed at all.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CorrectError {
    /// Neither a voltage nor SG.
    #[error("nothing to assess: give a rest voltage (--volts) or hydrometer readings (--sg)")]
    NoReading,
    /// A float voltage is not a rest voltage.
    #[error("a voltage taken on float charge is not a rest voltage: state of charge cannot be read from it (use the float checks, or rest the unit and measure again)")]
    FloatVoltage,
    /// SG on a valve-regulated type.
    #[error("profile '{0}' is valve-regulated: its electrolyte cannot be sampled, so SG readings do not apply")]
    NoHydrometer(String),
    /// The SG list does not match the cells.
    #[error("{given} SG readings for {cells} cells: give one reading per cell, or one mean value")]
    SgCount {
        /// Readings given.
        given: usize,
        /// Cells.
        cells: u32,
    },
    /// Cell count zero.
    #[error("cells must be at least 1")]
    NoCells,
    /// A number is NaN or infinite.
    #[error("{0} is not a finite number")]
    NotFinite(&'static str),
    /// The electrolyte model refused.
    #[error(transparent)]
    Electrolyte(#[from] ElectrolyteError),
}

/// Common cell counts tried when the stated count does not fit.
const CANDIDATE_CELLS: [u32; 8] = [1, 2, 3, 4, 6, 12, 18, 24];

#[inline(always)]
fn core(
    profile: &Profile,
    reading: &Reading,
    setup: &Setup,
    rules: &Rules,
    words: Words,
) -> Result<Core, CorrectError> {
    if reading.volts.is_none() && reading.sg.is_empty() {
        return Err(CorrectError::NoReading);
    }
    if reading.after == After::Float && reading.volts.is_some() {
        return Err(CorrectError::FloatVoltage);
    }
    let n = reading.cells.unwrap_or(profile.cells());
    if n == 0 {
        return Err(CorrectError::NoCells);
    }
    // Voltage and hydrometer are weighed by their intervals: with both, the
    // charge needs them.
    let words = if words == Words::Charge && !reading.sg.is_empty() {
        Words::Numbers
    } else {
        words
    };
    let mut flags = Flags::new(words);

    let (t, u_t) = match reading.temperature {
        Some(t) if !t.is_finite() => return Err(CorrectError::NotFinite("temperature")),
        Some(t) => (
            t,
            setup
                .temperature_uncertainty
                .map(|k| k.0)
                .unwrap_or(rules.get(RuleId::TemperatureUncertainty)),
        ),
        None => {
            flags.add(FlagCode::NoTemperature, || {
                format!(
                    "no temperature given: 25 °C assumed, ±{} K",
                    rules.get(RuleId::TemperatureMissingUncertainty)
                )
            });
            (
                Celsius(25.0),
                rules.get(RuleId::TemperatureMissingUncertainty),
            )
        }
    };
    // The electrolyte model is the authority on the usable temperature range.
    let water = electrolyte::water_density(t)?;
    if water.extrapolated {
        flags.add(FlagCode::Extrapolated, || format!(
                "{:.1} °C is outside the density model's published range (−11 to 75 °C): extrapolated",
                t.0
            ));
    }

    let rest = assess_rest(profile, reading.rest, reading.after);
    match rest.status {
        RestStatus::Short => flags.add(FlagCode::ShortRest, || {
            format!(
                "rested {:.1} h, the profile asks at least {:.0} h (preferably {:.0} h)",
                rest.rest_hours.unwrap_or(0.0),
                rest.minimum_hours,
                rest.preferred_hours
            )
        }),
        RestStatus::Unknown if reading.after != After::Float => flags
            .add(FlagCode::UnknownRest, || {
                "rest time not given: the interval allows for surface charge or recovery".into()
            }),
        _ => {}
    }

    let volts_part = match reading.volts {
        Some(v) => Some(volts_path(
            profile, v, n, t, u_t, &rest, setup, rules, &mut flags,
        )?),
        None => None,
    };
    let sg_part = if reading.sg.is_empty() {
        None
    } else {
        Some(sg_path(
            profile,
            &reading.sg,
            n,
            t,
            u_t,
            setup,
            rules,
            &mut flags,
        )?)
    };

    let untrusted_voltage = FlagCode::DISCREDIT_VOLTAGE
        .into_iter()
        .any(|c| flags.has(c));
    let (soc, interval, basis) = match (&volts_part, &sg_part) {
        (Some(v), None) => (v.soc, v.interval, "volts"),
        (None, Some(s)) => (s.soc_percent, s.soc_interval_percent, "sg"),
        (Some(v), Some(s)) if untrusted_voltage => (s.soc_percent, s.soc_interval_percent, "sg"),
        (Some(v), Some(s)) => {
            let overlap = v.interval[0] <= s.soc_interval_percent[1]
                && s.soc_interval_percent[0] <= v.interval[1];
            if overlap {
                let (soc, interval) =
                    combine(v.soc, v.interval, s.soc_percent, s.soc_interval_percent);
                (soc, interval, "volts+sg")
            } else {
                flags.add(FlagCode::SgVoltsDisagree, || format!(
                        "voltage says {:.0} % [{:.0}–{:.0}], hydrometer says {:.0} % [{:.0}–{:.0}]: stratification or surface charge",
                        v.soc, v.interval[0], v.interval[1], s.soc_percent,
                        s.soc_interval_percent[0], s.soc_interval_percent[1]
                    ));
                (s.soc_percent, s.soc_interval_percent, "sg")
            }
        }
        (None, None) => return Err(CorrectError::NoReading),
    };

    let coldest = match setup.min_temperature {
        Some(m) if m.0 < t.0 => m,
        _ => t,
    };
    let margin = rules.get(RuleId::FreezeMargin);
    // Warmer than any charge's freezing point and the margin: no look-up.
    // (The risk is judged at the interval's low end: none, no judgement.)
    let may_freeze = flags.intervals
        && profile
            .warmest_freezing_point()
            .map_or(true, |warmest| coldest.0 <= warmest.0 + margin);
    // A voltage no cell count explains says nothing of the charge, and its
    // interval is the clamped charge's, which above the curve is a full
    // battery's: the safe assumption is a flat one (the highest freezing
    // point), since nothing here rules it out. (A shorted cell's voltage lies
    // below the curve, where the clamp already gives a flat battery.)
    let says_nothing =
        charge_unknown(basis, |c| flags.has(c)) && !flags.has(FlagCode::SuspectShortedCell);
    if may_freeze && says_nothing {
        if let Some(fp_flat) = profile.warmest_freezing_point() {
            flags.add(FlagCode::FreezeRisk, || format!(
                    "{:.0} °C expected and the charge is not known; a flat battery's electrolyte freezes near {:.0} °C (margin {margin} °C)",
                    coldest.0, fp_flat.0
                ));
        }
    } else if may_freeze {
        if let Ok(fp_low) = profile.freezing_point_at(SocPercent(interval[0])) {
            if coldest.0 <= fp_low.0 + margin {
                flags.add(FlagCode::FreezeRisk, || format!(
                        "{:.0} °C expected; the electrolyte freezes near {:.0} °C at {:.0} % (margin {margin} °C)",
                        coldest.0, fp_low.0, interval[0]
                    ));
            }
        }
    }

    Ok(Core {
        n,
        t,
        rest,
        volts_part,
        sg_part,
        soc,
        interval,
        basis,
        flags,
    })
}

/// The numbers of one reading's assessment, and its flags.
struct Core {
    n: u32,
    t: Celsius,
    rest: RestAssessment,
    volts_part: Option<VoltsPart>,
    sg_part: Option<SgSummary>,
    soc: f64,
    interval: [f64; 2],
    basis: &'static str,
    flags: Flags,
}

/// State of charge, its interval and the flags of one reading, without the
/// words: what a fleet analysis needs from every reading it folds in. The
/// numbers are those [`assess`] gives for the same reading, to the bit: both
/// run the same arithmetic, and only the writing of words (evidence, the
/// budget's lines, per-cell SG lists) is left out (a test holds them equal).
#[derive(Clone, Debug, PartialEq)]
pub struct Estimate {
    /// State of charge.
    pub soc_percent: f64,
    /// Its 95 % interval.
    pub soc_interval_percent: [f64; 2],
    /// What it was read from: "volts", "sg" or "volts+sg".
    pub soc_basis: &'static str,
    /// Flags raised, in the order [`assess`] lists them.
    pub flags: FlagCodes,
}

impl Estimate {
    /// Whether a flag was raised.
    pub fn has(&self, code: FlagCode) -> bool {
        self.flags.contains(&code)
    }

    /// Whether a [`FlagCode::DISCREDIT_VOLTAGE`] flag was raised.
    pub fn voltage_discredited(&self) -> bool {
        FlagCode::DISCREDIT_VOLTAGE.into_iter().any(|c| self.has(c))
    }
}

/// A reading's state of charge without its interval: what a fleet analysis
/// needs of the many readings whose intervals it does not show.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Charge {
    /// State of charge: [`Estimate::soc_percent`], to the bit.
    pub soc_percent: f64,
    /// What it was read from, as [`Estimate::soc_basis`].
    pub soc_basis: &'static str,
    /// [`Estimate::voltage_discredited`].
    pub voltage_discredited: bool,
}

/// [`estimate`]'s state of charge, without working out its interval (a
/// reading with hydrometer values needs it, to weigh them against the
/// voltage) or the flags that depend on it. The same reading gives the same
/// error, the same charge and the same verdict on its voltage (tested).
pub fn estimate_charge(
    profile: &Profile,
    reading: &Reading,
    setup: &Setup,
    rules: &Rules,
) -> Result<Charge, CorrectError> {
    let c = core(profile, reading, setup, rules, Words::Charge)?;
    Ok(Charge {
        soc_percent: c.soc,
        soc_basis: c.basis,
        voltage_discredited: FlagCode::DISCREDIT_VOLTAGE
            .into_iter()
            .any(|code| c.flags.has(code)),
    })
}

/// [`assess`]'s numbers only; see [`Estimate`].
pub fn estimate(
    profile: &Profile,
    reading: &Reading,
    setup: &Setup,
    rules: &Rules,
) -> Result<Estimate, CorrectError> {
    let c = core(profile, reading, setup, rules, Words::Numbers)?;
    Ok(Estimate {
        soc_percent: c.soc,
        soc_interval_percent: c.interval,
        soc_basis: c.basis,
        flags: c.flags.codes,
    })
}

/// Assess one reading against a profile.
pub fn assess(
    profile: &Profile,
    reading: &Reading,
    setup: &Setup,
    rules: &Rules,
) -> Result<Assessment, CorrectError> {
    assess_with(profile, reading, setup, rules, Words::Full)
}

/// [`assess`] without the written uncertainty budget ([`Assessment::budget`]
/// is `None`; everything else is the same, tested): for a fleet report, which
/// shows each unit's flags and reasons but not the budget. The budget's
/// wording was half the cost of assessing a unit's latest reading.
pub fn assess_without_budget(
    profile: &Profile,
    reading: &Reading,
    setup: &Setup,
    rules: &Rules,
) -> Result<Assessment, CorrectError> {
    assess_with(profile, reading, setup, rules, Words::Evidence)
}

fn assess_with(
    profile: &Profile,
    reading: &Reading,
    setup: &Setup,
    rules: &Rules,
    words: Words,
) -> Result<Assessment, CorrectError> {
    let Core {
        n,
        t,
        rest,
        volts_part,
        sg_part,
        soc,
        interval,
        basis,
        flags,
    } = core(profile, reading, setup, rules, words)?;
    let frozen = flags.has(FlagCode::FreezeRisk);
    // With the charge not known, the safe figure is a flat battery's (the
    // highest freezing point), not the one at the charge the curve clamped
    // to, which for a voltage above the curve is a full battery's.
    let unknown = charge_unknown(basis, |c| flags.has(c));
    let flags = flags.list;
    let mut reasons = Vec::new();
    let freezing = if unknown {
        profile.warmest_freezing_point()
    } else {
        profile.freezing_point_at(SocPercent(soc)).ok()
    };
    decide(profile, soc, interval, &rest, &flags, rules, &mut reasons);
    reasons.sort_by_key(|r| r.action);
    let action = reasons
        .first()
        .map(|r| r.action)
        .unwrap_or(Action::Serviceable);

    let mut work: Vec<WorkKind> = action.work().to_vec();
    if !reading.sg.is_empty() {
        work.push(WorkKind::Hydrometer);
    }
    if frozen {
        work.push(WorkKind::Frozen);
    }
    let cautions = cautions_for_work(&work);

    Ok(Assessment {
        profile: profile.id().to_string(),
        cells: n,
        soc_percent: soc,
        soc_interval_percent: interval,
        soc_basis: basis,
        ocv_25c_volts: volts_part.as_ref().map(|v| v.ocv25_per_cell * n as f64),
        ocv_per_cell_25c_volts: volts_part.as_ref().map(|v| v.ocv25_per_cell),
        temperature_correction_mv: volts_part.as_ref().map(|v| v.correction_mv),
        temperature_celsius: t.0,
        rest,
        flags,
        action,
        reasons,
        freezing_point_celsius: freezing.map(|c| c.0),
        cautions,
        sg: sg_part,
        budget: volts_part.and_then(|v| v.budget),
    })
}

/// Inverse-variance mean of two estimates, taking each interval's half-width as 2u.
fn combine(a: f64, ai: [f64; 2], b: f64, bi: [f64; 2]) -> (f64, [f64; 2]) {
    let ua = ((ai[1] - ai[0]) / 4.0).max(1e-6);
    let ub = ((bi[1] - bi[0]) / 4.0).max(1e-6);
    let (wa, wb) = (1.0 / ua.powi(2), 1.0 / ub.powi(2));
    // A weighted mean lies between its parts; the clamp undoes rounding, which
    // made two estimates of 100 % combine to 100.00000000000001 %.
    let m = ((a * wa + b * wb) / (wa + wb)).clamp(a.min(b), a.max(b));
    let u = (1.0 / (wa + wb)).sqrt();
    (
        m,
        [
            (m - 2.0 * u).clamp(0.0, 100.0),
            (m + 2.0 * u).clamp(0.0, 100.0),
        ],
    )
}

struct VoltsPart {
    soc: f64,
    interval: [f64; 2],
    ocv25_per_cell: f64,
    correction_mv: f64,
    /// Written out only when words are wanted.
    budget: Option<Budget>,
}

/// Per-cell OCV at 25 °C from a unit reading of `cells` cells, with the
/// coefficient taken at the state of charge it implies.
fn to_25c(profile: &Profile, v: Volts, cells: u32, t: Celsius) -> crate::profile::Referred {
    profile.refer_to_25c(Volts(v.0 / cells as f64), t)
}

#[allow(clippy::too_many_arguments)]
fn volts_path(
    profile: &Profile,
    v: Volts,
    n: u32,
    t: Celsius,
    u_t: f64,
    rest: &RestAssessment,
    setup: &Setup,
    rules: &Rules,
    flags: &mut Flags,
) -> Result<VoltsPart, CorrectError> {
    if !v.is_finite() {
        return Err(CorrectError::NotFinite("voltage"));
    }
    let nf = n as f64;
    let referred = to_25c(profile, v, n, t);
    let (v25, coef) = (referred.ocv25.0, referred.coefficient.0);
    let correction_mv = (v25 - v.0 / nf) * nf * 1000.0;
    if !flags.intervals {
        // The charge alone: the checks that can discredit the voltage do not
        // look at the interval.
        let soc = referred.lookup.soc.0;
        plausibility(profile, v, v25, n, t, rest, soc, None, rules, flags);
        return Ok(VoltsPart {
            soc,
            interval: [f64::NAN; 2],
            ocv25_per_cell: v25,
            correction_mv,
            budget: None,
        });
    }

    // GUM budget on the per-cell OCV at 25 °C.
    let meter_half = setup.meter.half_width(v, setup.resolution).0 / nf;
    // Unknown direction: the allowance is symmetric, so it enters the budget;
    // a known direction widens one side only (an uncorrected one-sided bias).
    let (below, above) = (
        rest.allowance_below_mv_per_cell,
        rest.allowance_above_mv_per_cell,
    );
    let two_sided = below > 0.0 && above > 0.0;
    // The standard uncertainties, in the budget's order. They are combined
    // here for both paths; the written budget (assess only) is built from the
    // same values, so a fleet reading never pays for its Vec and Strings.
    let u = [
        rectangular(meter_half) * 1000.0,
        rectangular(setup.resolution.0 / 2.0) / nf * 1000.0,
        coef.abs() * u_t,
        rules.get(RuleId::CoefficientUncertainty) * (t.0 - 25.0).abs(),
        rectangular(profile.spec.tolerance.curve_mv_per_cell.value),
        rectangular(below.max(above)),
    ];
    let u = &u[..if two_sided { 6 } else { 5 }];
    let expanded_mv = COVERAGE_FACTOR * root_sum_of_squares(u.iter().copied());
    let budget = flags.budget_words.then(|| {
        let mut contributions = Vec::with_capacity(u.len());
        let mut add = |input, basis| {
            contributions.push(Contribution {
                input,
                standard_uncertainty_mv_per_cell: u[contributions.len()],
                basis,
            })
        };
        add(
            "meter accuracy",
            format!("{} rectangular, /{} cells", setup.meter, n),
        );
        add(
            "display resolution",
            format!("±{} V / 2 rectangular", setup.resolution.0),
        );
        add("temperature", format!("{u_t} K × {coef:.3} mV/K"));
        add(
            "temperature coefficient",
            format!(
                "{} mV/K × |{:.1} − 25| K",
                rules.get(RuleId::CoefficientUncertainty),
                t.0
            ),
        );
        add(
            "curve tolerance",
            format!(
                "±{} mV per cell rectangular",
                profile.spec.tolerance.curve_mv_per_cell.value
            ),
        );
        if two_sided {
            add(
                "rest allowance",
                format!(
                    "±{:.0} mV per cell rectangular (direction unknown)",
                    below.max(above)
                ),
            );
        }
        Budget::new(contributions)
    });
    let u_exp = expanded_mv / 1000.0;
    let (extra_below, extra_above) = if two_sided {
        (0.0, 0.0)
    } else {
        (below / 1000.0, above / 1000.0)
    };
    let lookup = referred.lookup;
    let lo = profile
        .soc_from_ocv25(Volts(v25 - u_exp - extra_below))
        .soc
        .0;
    let hi = profile
        .soc_from_ocv25(Volts(v25 + u_exp + extra_above))
        .soc
        .0;

    plausibility(
        profile,
        v,
        v25,
        n,
        t,
        rest,
        lookup.soc.0,
        Some(hi),
        rules,
        flags,
    );
    if let Some((end, by)) = lookup.beyond {
        flags.add(FlagCode::BeyondCurve, || {
            format!(
                "{:.0} mV per cell {} end: state of charge clamped",
                by.0 * 1000.0,
                match end {
                    crate::profile::curve::CurveEnd::AboveFull => "above the curve's full",
                    crate::profile::curve::CurveEnd::BelowEmpty => "below the curve's empty",
                },
            )
        });
    }
    Ok(VoltsPart {
        soc: lookup.soc.0,
        interval: [lo, hi],
        ocv25_per_cell: v25,
        correction_mv,
        budget,
    })
}

/// Does a per-cell voltage (for `k` cells) lie on the curve within the margins?
fn fits(profile: &Profile, v: Volts, k: u32, t: Celsius, rules: &Rules) -> bool {
    fits_at_25c(profile, to_25c(profile, v, k, t).ocv25.0, rules)
}

/// [`fits`] for a per-cell OCV already referred to 25 °C.
fn fits_at_25c(profile: &Profile, v25: f64, rules: &Rules) -> bool {
    let margin = rules.get(RuleId::CurveMargin) / 1000.0;
    let allowance = profile
        .spec
        .thresholds
        .beyond_full_allowance_mv_per_cell
        .value
        / 1000.0;
    v25 >= profile.curve().volts_min().0 - margin
        && v25 <= profile.curve().volts_max().0 + allowance
}

#[allow(clippy::too_many_arguments)]
fn plausibility(
    profile: &Profile,
    v: Volts,
    v25: f64,
    n: u32,
    t: Celsius,
    rest: &RestAssessment,
    soc: f64,
    soc_high: Option<f64>,
    rules: &Rules,
    flags: &mut Flags,
) {
    let floor = rules.get(RuleId::ConnectionFloor);
    if v.0 <= 0.0 || v.0 / (n as f64) < floor {
        flags.add(FlagCode::CheckConnection, || format!(
                "{:.2} V is not a {}-cell lead-acid rest voltage (below {floor} V per cell{}): check leads, polarity and probe contact",
                v.0,
                n,
                if v.0 < 0.0 { ", negative" } else { "" }
            ));
        return;
    }
    let curve = profile.curve();
    let allowance = profile
        .spec
        .thresholds
        .beyond_full_allowance_mv_per_cell
        .value;
    if fits_at_25c(profile, v25, rules) {
        let above_mv = (v25 - curve.volts_max().0) * 1000.0;
        if above_mv > allowance {
            flags.add(FlagCode::BeyondFull, || format!(
                    "{} mV per cell above the full-charge OCV (allowance {allowance} mV): surface charge or the wrong profile",
                    shown_beside(above_mv, allowance, 0)
                ));
        } else if let Some(soc_high) = soc_high.filter(|&h| h < rules.get(RuleId::DeepDischarge)) {
            flags.add(FlagCode::DeepDischarge, || {
                let limit = rules.get(RuleId::DeepDischarge);
                format!(
                    "{} % (at most {} %), below {limit} %",
                    shown_beside(soc, limit, 0),
                    shown_beside(soc_high, limit, 0),
                )
            });
        }
        return;
    }
    let below = v25 < curve.volts_min().0;
    if below && n > 1 && fits(profile, v, n - 1, t, rules) {
        let soc_fewer = to_25c(profile, v, n - 1, t).lookup.soc.0;
        flags.add(FlagCode::SuspectShortedCell, || format!(
                "{:.2} V fits {} cells at {:.0} % but no charge of {} cells: one cell is likely shorted",
                v.0,
                n - 1,
                soc_fewer,
                n
            ));
        return;
    }
    if let Some(k) = CANDIDATE_CELLS
        .iter()
        .copied()
        .filter(|&k| k != n && k + 1 != n)
        .find(|&k| fits(profile, v, k, t, rules))
    {
        flags.add(FlagCode::WrongCellCount, || {
            format!(
                "{:.2} V fits {k} cells, not {n}: check --cells and the profile",
                v.0
            )
        });
        return;
    }
    if below {
        flags.add(FlagCode::DeepDischarge, || {
            format!(
                "{:.0} mV per cell below the curve's 0 % point: deeply discharged",
                (curve.volts_min().0 - v25) * 1000.0
            )
        });
    } else if rest.status == RestStatus::Short || rest.status == RestStatus::Unknown {
        flags.add(FlagCode::BeyondFull, || format!(
                "{:.0} mV per cell above full charge: surface charge from a recent charge, or still on charge",
                (v25 - curve.volts_max().0) * 1000.0
            ));
    } else {
        flags.add(FlagCode::CheckConnection, || format!(
                "{:.2} V is far above any rest voltage of {n} cells: a charger still connected, or the wrong battery",
                v.0
            ));
    }
}

/// Cells whose corrected SG the numbers-only path holds on the stack: a
/// 48 V string of 2 V cells. Longer lists are rare and go to the heap.
const STACK_CELLS: usize = 24;

/// The hydrometer part. Without words (see [`Flags`]) the summary's per-cell
/// values and low cells are left empty: only its numbers are read.
#[allow(clippy::too_many_arguments)]
fn sg_path(
    profile: &Profile,
    sg: &[SpecificGravity],
    n: u32,
    t: Celsius,
    u_t: f64,
    setup: &Setup,
    rules: &Rules,
    flags: &mut Flags,
) -> Result<SgSummary, CorrectError> {
    if !profile.hydrometer_usable() {
        return Err(CorrectError::NoHydrometer(profile.id().to_string()));
    }
    if sg.len() != 1 && sg.len() != n as usize {
        return Err(CorrectError::SgCount {
            given: sg.len(),
            cells: n,
        });
    }
    // A fleet reading's values stay on the stack; assess keeps them for its summary.
    let mut stack = [0.0; STACK_CELLS];
    let mut heap = Vec::new();
    let per_cell: &mut [f64] = if !flags.words && sg.len() <= STACK_CELLS {
        &mut stack[..sg.len()]
    } else {
        heap.resize(sg.len(), 0.0);
        &mut heap
    };
    for (c, s) in per_cell.iter_mut().zip(sg) {
        *c = electrolyte::correct_to_25c(*s, t, setup.hydrometer_rule)?
            .value
            .0;
    }
    let per_cell: &[f64] = per_cell;
    let cells = per_cell.len();
    let mean = per_cell.iter().sum::<f64>() / per_cell.len() as f64;
    let max = per_cell.iter().cloned().fold(f64::MIN, f64::max);
    let min = per_cell.iter().cloned().fold(f64::MAX, f64::min);
    let spread = if per_cell.len() > 1 { max - min } else { 0.0 };
    let below = rules.get(RuleId::SgCellBelowMean);
    let is_low = |s: f64| mean - s > below + 1e-9;
    let low_cells: Vec<usize> = if flags.words {
        per_cell
            .iter()
            .enumerate()
            .filter(|(_, s)| is_low(**s))
            .map(|(i, _)| i + 1)
            .collect()
    } else {
        Vec::new()
    };
    if per_cell.iter().any(|s| is_low(*s)) {
        flags.add(FlagCode::LowCellSg, || {
            format!(
                "cell {} more than {below:.3} below the mean {mean:.3} (corrected to 25 °C)",
                low_cells
                    .iter()
                    .map(|c| format!("{c} ({:.3})", per_cell[c - 1]))
                    .collect::<Vec<_>>()
                    .join(", ")
            )
        });
    }
    let spread_limit = rules.get(RuleId::SgSpread);
    if spread > spread_limit + 1e-9 {
        flags.add(FlagCode::SgSpread, || {
            format!(
                "cell-to-cell spread {}, above {spread_limit:.3}",
                shown_beside(spread, spread_limit, 3)
            )
        });
    }
    let (lo, hi) = profile.sg_range();
    let soc = profile.soc_from_sg(SpecificGravity(mean)).0;
    // Standard uncertainty of the mean SG: reading uncertainty over √cells, and
    // the temperature uncertainty through the correction slope (about
    // 0.0006 per K, REFERENCES §2; the 1.67 °C rule gives 0.000 6).
    let u_read = rules.get(RuleId::HydrometerUncertainty) / (cells as f64).sqrt();
    let u_sg = (u_read.powi(2) + (0.0006 * u_t).powi(2)).sqrt();
    let u_soc = u_sg / (hi.0 - lo.0) * 100.0;
    Ok(SgSummary {
        // Empty on the numbers-only path (see above); only assess shows them.
        per_cell_25c: heap,
        mean_25c: mean,
        spread,
        low_cells,
        soc_percent: soc.clamp(0.0, 100.0),
        soc_interval_percent: [
            (soc - 2.0 * u_soc).clamp(0.0, 100.0),
            (soc + 2.0 * u_soc).clamp(0.0, 100.0),
        ],
    })
}

fn reason(action: Action, rule: &str, detail: String, source: &str) -> Reason {
    Reason {
        action,
        rule: rule.to_string(),
        detail,
        source: source.to_string(),
    }
}

fn decide(
    profile: &Profile,
    soc: f64,
    interval: [f64; 2],
    rest: &RestAssessment,
    flags: &[Flag],
    rules: &Rules,
    reasons: &mut Vec<Reason>,
) {
    let has = |c: FlagCode| flags.iter().find(|f| f.code == c);
    let equalize_or_test = if profile.spec.equalize_allowed.value {
        Action::Equalize
    } else {
        Action::CapacityTest
    };
    if let Some(f) = has(FlagCode::CheckConnection).or(has(FlagCode::WrongCellCount)) {
        reasons.push(reason(
            Action::Remeasure,
            f.code.as_str(),
            f.detail.clone(),
            "common practice: a reading that no cell count explains is a measurement fault",
        ));
        // No charge to act on, but the cold still matters to whoever measures
        // again, and perhaps connects a charger.
        if let Some(f) = has(FlagCode::FreezeRisk) {
            reasons.push(reason(
                Action::Remeasure,
                f.code.as_str(),
                format!("{}: before any charging, look for ice or a bulging case, and never charge a frozen battery", f.detail),
                "published: freezing points by SG, US Army TM 5-1185 Table III; never charge a frozen battery (US Army OD1002)",
            ));
        }
        return;
    }
    if let Some(f) = has(FlagCode::SuspectShortedCell) {
        reasons.push(reason(
            Action::Replace,
            f.code.as_str(),
            f.detail.clone(),
            "published: a block about one cell (≈ 2.1 V) low after charging has a shorted cell (vehicle and stationary service manuals; REFERENCES §5)",
        ));
    }
    let t = &profile.spec.thresholds;
    let shorted = has(FlagCode::SuspectShortedCell).is_some();
    if !shorted {
        if let Some(f) = has(FlagCode::DeepDischarge) {
            reasons.push(reason(
                Action::RechargeNow,
                f.code.as_str(),
                format!(
                    "{}; after recharging, a capacity test shows whether it recovered",
                    f.detail
                ),
                RuleId::DeepDischarge.def().source,
            ));
        } else if soc < t.urgent_below_soc_percent.value {
            reasons.push(reason(
                Action::RechargeNow,
                "urgent-below",
                format!(
                    "{} % is below {} %",
                    shown_beside(soc, t.urgent_below_soc_percent.value, 0),
                    t.urgent_below_soc_percent.value
                ),
                &t.urgent_below_soc_percent.source,
            ));
        } else if soc < t.recharge_below_soc_percent.value {
            reasons.push(reason(
                Action::Recharge,
                "recharge-below",
                format!(
                    "{} % is below {} %",
                    shown_beside(soc, t.recharge_below_soc_percent.value, 0),
                    t.recharge_below_soc_percent.value
                ),
                &t.recharge_below_soc_percent.source,
            ));
        }
    }
    if let Some(f) = has(FlagCode::FreezeRisk) {
        if interval[1] < 95.0 {
            reasons.push(reason(
                Action::RechargeNow,
                f.code.as_str(),
                format!("{}; a charged electrolyte freezes far lower. Never charge a frozen battery", f.detail),
                "published: freezing points by SG, US Army TM 5-1185 Table III; never charge a frozen battery (US Army OD1002)",
            ));
        } else {
            reasons.push(reason(
                Action::Serviceable,
                f.code.as_str(),
                format!(
                    "{}; already near full charge: keep it charged and protect it from the cold",
                    f.detail
                ),
                "published: US Army TM 5-1185 Table III",
            ));
        }
    }
    if let Some(f) = has(FlagCode::ShortRest) {
        let wait = rest.wait_hours.unwrap_or(0.0);
        reasons.push(reason(
            Action::Remeasure,
            f.code.as_str(),
            format!(
                "{}; measure again in {:.1} h, or remove the surface charge with a 15 s load and measure after 3–5 min",
                f.detail, wait
            ),
            "common practice: rest at least 4–6 h; surface-charge removal by a 15 s load and a 3–5 min wait (US Army and vehicle service manuals, published)",
        ));
    }
    if let Some(f) = has(FlagCode::BeyondFull) {
        reasons.push(reason(
            Action::Remeasure,
            f.code.as_str(),
            f.detail.clone(),
            &t.beyond_full_allowance_mv_per_cell.source,
        ));
    }
    if let Some(f) = has(FlagCode::LowCellSg) {
        reasons.push(reason(
            equalize_or_test,
            f.code.as_str(),
            f.detail.clone(),
            &rules.source(RuleId::SgCellBelowMean),
        ));
    }
    if let Some(f) = has(FlagCode::SgSpread) {
        reasons.push(reason(
            equalize_or_test,
            f.code.as_str(),
            format!(
                "{}; if it persists after a full (equalizing) charge the unit is unserviceable",
                f.detail
            ),
            &rules.source(RuleId::SgSpread),
        ));
    }
    if let Some(f) = has(FlagCode::SgVoltsDisagree) {
        reasons.push(reason(
            if profile.spec.equalize_allowed.value { Action::Equalize } else { Action::Remeasure },
            f.code.as_str(),
            f.detail.clone(),
            "common practice: stratified electrolyte reads falsely high on OCV; remedy an equalizing charge (REFERENCES §5)",
        ));
    }
    if reasons.is_empty() {
        reasons.push(reason(
            Action::Serviceable,
            "within-limits",
            format!(
                "{} % [{}–{}], at or above the recharge threshold {} %",
                Whole(soc),
                Whole(interval[0]),
                Whole(interval[1]),
                t.recharge_below_soc_percent.value
            ),
            &t.recharge_below_soc_percent.source,
        ));
    }
}
