//! The one rules table: every threshold restvolt judges by, with its default,
//! unit and source. `restvolt rules` prints it; `--rules FILE` overrides values.
//!
//! Profile-specific limits (recharge threshold, rest times, curve tolerance)
//! live in the profiles; this table holds the limits that apply across types.

use serde::Serialize;
use std::collections::BTreeMap;

macro_rules! rules {
    ($( $variant:ident => ($id:expr, $default:expr, $unit:expr, $desc:expr, $source:expr) ),* $(,)?) => {
        /// Identifier of a rule in the table.
        #[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize)]
        pub enum RuleId { $( #[doc = $desc] $variant ),* }

        /// Every rule with its default, unit, description and source.
        pub const TABLE: &[RuleDef] = &[ $( RuleDef { rule: RuleId::$variant, id: $id, default: $default, unit: $unit, description: $desc, source: $source } ),* ];
    };
}

rules! {
    SgCellBelowMean => ("sg-cell-below-mean", 0.010, "SG",
        "a cell whose temperature-corrected SG is this far below the unit's or string's mean is low",
        "published: IEEE Std 450-1987 §4.4 (equalize when a cell is more than 0.010 below average)"),
    SgSpread => ("sg-spread", 0.025, "SG",
        "cell-to-cell SG spread above this is too wide",
        "published: US Army TM 9-6140-200-14 §4-7 (over 0.025 after a full charge: unserviceable; other manuals 0.030–0.050)"),
    FreezeMargin => ("freeze-margin", 5.0, "°C",
        "warn when the temperature comes within this margin of the electrolyte's freezing point",
        "common practice"),
    DeepDischarge => ("deep-discharge", 20.0, "% SOC",
        "a rested unit below this state of charge is deeply discharged",
        "common practice: below about 20 % a lead-acid unit sulfates quickly and may not recover fully"),
    CurveMargin => ("curve-margin", 60.0, "mV per cell",
        "how far beyond the curve's ends a per-cell voltage may lie and still count as plausible for a cell count",
        "common practice: the spread of rest voltages between makers"),
    ConnectionFloor => ("connection-floor", 1.0, "V per cell",
        "below this per nominal cell, the reading is not a battery voltage: leads, polarity or contact",
        "common practice: even a deeply discharged lead-acid cell holds well above 1.5 V at rest"),
    TemperatureUncertainty => ("temperature-uncertainty", 2.0, "K",
        "standard uncertainty of a battery temperature taken on the case or terminal",
        "common practice: a case or terminal reading differs from the electrolyte by a few kelvin"),
    TemperatureMissingUncertainty => ("temperature-missing-uncertainty", 10.0, "K",
        "standard uncertainty assumed when no temperature is given (25 °C is assumed)",
        "common practice: field temperatures span about ±20 °C around 25 °C"),
    CoefficientUncertainty => ("coefficient-uncertainty", 0.05, "mV/K per cell",
        "standard uncertainty of the OCV temperature coefficient",
        "derived: REFERENCES §1.3 gives medium confidence, about ±0.05 mV/K"),
    HydrometerUncertainty => ("hydrometer-uncertainty", 0.003, "SG",
        "standard uncertainty of one hydrometer reading (graduation, parallax, float calibration)",
        "common practice: float hydrometers are graduated in 0.002–0.005"),
    TrendFactor => ("trend-factor", 2.0, "× expected",
        "a falling state-of-charge trend faster than this multiple of the profile's self-discharge (with 95 % confidence) is abnormal",
        "common practice"),
    SulfationDays => ("sulfation-days", 30.0, "days",
        "days spent below the recharge threshold before sulfation is a risk",
        "published: standing discharged or incompletely recharged causes sulfation (US Bureau of Reclamation FIST 3-6 §2.23–2.24); the day count is common practice"),
    PostChargeShortfall => ("post-charge-shortfall", 90.0, "% SOC",
        "a rested reading after a charge below this state of charge is a shortfall (sulfation or lost capacity)",
        "published: a normal charge that does not bring SG/OCV back indicates sulfation (FIST 3-6 §2.23–2.24); the level is common practice"),
    PeerZ => ("peer-z", 3.5, "robust z",
        "a unit whose rested per-cell voltage has a modified z-score beyond this among its peers is an outlier",
        "published: Iglewicz & Hoaglin (1993), modified z-score 0.6745·(x − median)/MAD, outliers beyond 3.5"),
    PeerMinMv => ("peer-min-mv", 15.0, "mV per cell",
        "an outlier must also lie at least this far from the peers' median",
        "common practice: below this a difference is within meter and curve tolerance"),
    OhmicWarn => ("ohmic-warn", 25.0, "% above baseline",
        "ohmic value this far above the unit's baseline: watch",
        "from memory, unconfirmed: warn at +20–30 % over baseline (REFERENCES §5)"),
    OhmicAct => ("ohmic-act", 50.0, "% above baseline",
        "ohmic value this far above the unit's baseline: capacity test or replace",
        "from memory, unconfirmed: act at about +50 % over baseline (REFERENCES §5)"),
    LifeHalving => ("life-halving", 8.0, "°C",
        "service life halves for each this many °C of average temperature above 25 °C",
        "common practice (some makers say 10 °C)"),
    HeatAgeingWarn => ("heat-ageing-warn", 2.0, "× ageing",
        "a heat-ageing factor above this makes a capacity test due",
        "common practice"),
    FloatDeviation => ("float-deviation", 0.04, "V per cell",
        "a cell or unit this far below the string's average float voltage is low",
        "published: US Bureau of Reclamation FIST 3-6 §1.2C (0.04 V below average on float: equalize)"),
    TempSpread => ("temp-spread", 3.0, "°C",
        "cell-to-cell temperature spread in a string above this needs its cause found",
        "published: US Bureau of Reclamation FIST 3-6 §1.5"),
    VrlaOverAmbient => ("vrla-over-ambient", 10.0, "°C",
        "a VRLA unit this far above ambient risks thermal runaway",
        "published: VRLA makers' manuals (REFERENCES §5)"),
    FloatCurrentRise => ("float-current-rise", 50.0, "% rise",
        "float current rising by this much between visits at constant voltage warns of thermal runaway",
        "published: VRLA makers' manuals, rising float current at constant voltage (REFERENCES §5); the percentage is common practice"),
    FloatSettledFactor => ("float-settled-factor", 2.0, "× expected",
        "float current within this multiple of the profile's expected current counts as settled at full charge",
        "common practice"),
}

/// One row of the rules table.
#[derive(Clone, Copy, Debug, Serialize)]
pub struct RuleDef {
    /// Typed identifier.
    #[serde(skip)]
    pub rule: RuleId,
    /// Identifier as written in reports and override files.
    pub id: &'static str,
    /// Default value.
    pub default: f64,
    /// Unit of the value.
    pub unit: &'static str,
    /// What the rule says.
    pub description: &'static str,
    /// Where the default comes from.
    pub source: &'static str,
}

impl RuleId {
    /// The table row of this rule.
    pub fn def(self) -> &'static RuleDef {
        // TABLE is generated in the enum's order, so the discriminant indexes it.
        &TABLE[self as usize]
    }
    /// The id as written in reports.
    pub fn id(self) -> &'static str {
        self.def().id
    }
}

/// A rules file could not be used.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum RulesError {
    /// TOML syntax or shape.
    #[error("{origin}:{line}: {message}")]
    Syntax {
        /// File name.
        origin: String,
        /// 1-based line.
        line: usize,
        /// What is wrong.
        message: String,
    },
    /// An id not in the table.
    #[error("{origin}: unknown rule '{id}'{}; `restvolt rules` lists the ids", suggestion.as_ref().map(|s| format!(" (did you mean '{s}'?)")).unwrap_or_default())]
    UnknownRule {
        /// File name.
        origin: String,
        /// The id.
        id: String,
        /// Nearest id.
        suggestion: Option<String>,
    },
    /// A value that is not a finite non-negative number.
    #[error("{origin}: rule '{id}': {value} is not a usable value (expected a finite number ≥ 0, in {unit})")]
    BadValue {
        /// File name.
        origin: String,
        /// The id.
        id: String,
        /// The value.
        value: f64,
        /// The rule's unit.
        unit: &'static str,
    },
}

/// The rules in effect: defaults, with any overrides and where they came from.
#[derive(Clone, Debug, Default)]
pub struct Rules {
    overrides: BTreeMap<RuleId, (f64, String)>,
}

/// The override file's shape: `[rules]` with `id = value`.
#[derive(serde::Deserialize)]
#[serde(deny_unknown_fields)]
struct RulesFile {
    rules: BTreeMap<String, f64>,
}

impl Rules {
    /// The value of a rule in effect.
    pub fn get(&self, rule: RuleId) -> f64 {
        self.overrides
            .get(&rule)
            .map(|(v, _)| *v)
            .unwrap_or(rule.def().default)
    }

    /// The source of the value in effect (the override file, or the default's source).
    pub fn source(&self, rule: RuleId) -> String {
        match self.overrides.get(&rule) {
            Some((_, origin)) => format!("override from {origin} (default: {})", rule.def().source),
            None => rule.def().source.to_string(),
        }
    }

    /// Read overrides from TOML text (`[rules]` table of `id = value`).
    pub fn from_toml(text: &str, origin: &str) -> Result<Rules, RulesError> {
        let file: RulesFile = toml::from_str(text).map_err(|e| RulesError::Syntax {
            origin: origin.to_string(),
            line: crate::profile::toml_error_line(text, &e),
            message: e.message().to_string(),
        })?;
        let mut rules = Rules::default();
        for (id, value) in file.rules {
            let Some(def) = TABLE.iter().find(|d| d.id == id) else {
                let suggestion = TABLE
                    .iter()
                    .map(|d| (strsim::damerau_levenshtein(&id, d.id), d.id))
                    .filter(|(dist, _)| *dist <= 3)
                    .min()
                    .map(|(_, s)| s.to_string());
                return Err(RulesError::UnknownRule {
                    origin: origin.to_string(),
                    id,
                    suggestion,
                });
            };
            if !value.is_finite() || value < 0.0 {
                return Err(RulesError::BadValue {
                    origin: origin.to_string(),
                    id,
                    value,
                    unit: def.unit,
                });
            }
            rules
                .overrides
                .insert(def.rule, (value, origin.to_string()));
        }
        Ok(rules)
    }

    /// Every rule with the value in effect and its source, in table order.
    pub fn effective(&self) -> Vec<EffectiveRule> {
        TABLE
            .iter()
            .map(|d| EffectiveRule {
                id: d.id,
                value: self.get(d.rule),
                default: d.default,
                unit: d.unit,
                description: d.description,
                source: self.source(d.rule),
                overridden: self.overrides.contains_key(&d.rule),
            })
            .collect()
    }
}

/// A rule as in effect for one run.
#[derive(Clone, Debug, Serialize)]
pub struct EffectiveRule {
    /// Rule id.
    pub id: &'static str,
    /// Value in effect.
    pub value: f64,
    /// Default value.
    pub default: f64,
    /// Unit.
    pub unit: &'static str,
    /// What the rule says.
    pub description: &'static str,
    /// Source of the value in effect.
    pub source: String,
    /// Whether an override file changed it.
    pub overridden: bool,
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn table_is_indexed_by_the_enum_and_ids_are_unique() {
        for (i, d) in TABLE.iter().enumerate() {
            assert_eq!(d.rule as usize, i);
            assert_eq!(d.rule.def().id, d.id);
            assert!(!d.source.is_empty());
        }
        let mut ids: Vec<_> = TABLE.iter().map(|d| d.id).collect();
        ids.sort();
        ids.dedup();
        assert_eq!(ids.len(), TABLE.len());
    }

    #[test]
    fn published_defaults() {
        // IEEE Std 450-1987 §4.4 (published): 0.010 below average.
        assert_eq!(RuleId::SgCellBelowMean.def().default, 0.010);
        // TM 9-6140-200-14 §4-7 (published): spread over 0.025.
        assert_eq!(RuleId::SgSpread.def().default, 0.025);
        // FIST 3-6 §1.2C (published): 0.04 V per cell below average on float.
        assert_eq!(RuleId::FloatDeviation.def().default, 0.04);
        // FIST 3-6 §1.5 (published): 3 °C spread.
        assert_eq!(RuleId::TempSpread.def().default, 3.0);
    }

    #[test]
    fn overrides_apply_and_bad_ones_are_named() {
        let r = Rules::from_toml("[rules]\nsg-spread = 0.030\n", "site.toml").unwrap();
        assert_eq!(r.get(RuleId::SgSpread), 0.030);
        assert!(r.source(RuleId::SgSpread).contains("site.toml"));
        assert_eq!(r.get(RuleId::PeerZ), 3.5);
        let e = Rules::from_toml("[rules]\nsg-sprad = 0.03\n", "f.toml")
            .unwrap_err()
            .to_string();
        assert!(e.contains("did you mean 'sg-spread'"), "{e}");
        let e = Rules::from_toml("[rules]\nsg-spread = -1\n", "f.toml")
            .unwrap_err()
            .to_string();
        assert!(e.contains("sg-spread") && e.contains("≥ 0"), "{e}");
        let e = Rules::from_toml("[rules]\nsg-spread = \"x\"\n", "f.toml")
            .unwrap_err()
            .to_string();
        assert!(e.starts_with("f.toml:2"), "{e}");
    }
}
