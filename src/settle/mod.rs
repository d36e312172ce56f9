//! Rest-voltage settling: from a few readings taken while a battery rests
//! after a charge (the voltage decays) or a discharge (it recovers), estimate
//! the rested voltage with a 95 % interval, the settling rate and when the
//! reading will be steady.
//!
//! Two relaxation models are fitted by least squares:
//!
//! 1. **Semi-log**, V(t) = a + b·log10(t) (Aylor, Thieme & Johnson, IEEE Trans.
//!    Ind. Electron. 39(5) 398, 1992). Its "rested voltage" is its value at
//!    [`SettleOptions::target_rest`]: the model has no asymptote.
//! 2. **Single exponential**, V(t) = V∞ + A·exp(−t/τ), the RC relaxation of
//!    equivalent-circuit models (Coleman, Hurley & Lee 2004; Ceraolo 2000).
//!    Its "rested voltage" is the asymptote V∞. Needs at least four readings.
//!
//! The model with the lower AICc (small-sample Akaike information criterion,
//! k = fitted parameters + 1 for σ) is chosen; on a tie, or when neither AICc
//! is defined (n ≤ k + 1), the semi-log model, having fewer parameters, is
//! taken. With fewer than six readings the exponential therefore never wins.
//!
//! A series is refused rather than given a confident number when it has fewer
//! than three readings, times that are not positive and strictly increasing,
//! non-finite voltages, a span shorter than [`MIN_SPAN_HOURS`] or a last/first
//! elapsed ratio below [`MIN_ELAPSED_RATIO`], a chosen fit whose residual SD is
//! above [`RESIDUAL_LIMIT_FACTOR`] × max(resolution, 1 mV) (a spike, a loose
//! lead, a load still connected), or a curve that moves the wrong way for
//! [`SettleOptions::after`].

mod fit;
pub mod input;

use crate::units::{Hours, Volts};
use serde::{Deserialize, Serialize};

pub use input::{parse_reading_arg, points, read_rest_csv, RestReading};

/// One rest-voltage reading.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct RestPoint {
    /// Time since the end of the charge or discharge.
    pub elapsed: Hours,
    /// The reading.
    pub volts: Volts,
}

/// What the battery is resting after: decides which way the voltage must move.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum RestAfter {
    /// After a charge: surface charge decays, the voltage falls.
    Charge,
    /// After a discharge: the voltage recovers, it rises.
    Discharge,
}

impl std::fmt::Display for RestAfter {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            RestAfter::Charge => "charge",
            RestAfter::Discharge => "discharge",
        })
    }
}

/// How the analysis is to be done.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct SettleOptions {
    /// What the rest follows, if known; `None` skips the direction check.
    pub after: Option<RestAfter>,
    /// Meter display resolution, e.g. 0.001 V or 0.01 V.
    pub resolution: Volts,
    /// The profile's preferred rest time: the semi-log model is evaluated there.
    pub target_rest: Hours,
    /// Steady when |dV/dt| is below this (common practice: 1 mV/h).
    pub settling_limit_mv_per_h: f64,
}

impl Default for SettleOptions {
    /// No direction check, a 1 mV meter, a 24 h target rest (REFERENCES §4:
    /// "preferably 24 h", common practice) and the 1 mV/h settling limit
    /// (common practice).
    fn default() -> Self {
        SettleOptions {
            after: None,
            resolution: Volts(0.001),
            target_rest: Hours(24.0),
            settling_limit_mv_per_h: 1.0,
        }
    }
}

/// Which relaxation model a fit uses.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum RelaxationModel {
    /// V(t) = a + b·log10(t / 1 h).
    SemiLog,
    /// V(t) = V∞ + A·exp(−t/τ).
    Exponential,
}

impl std::fmt::Display for RelaxationModel {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            RelaxationModel::SemiLog => "semi-log",
            RelaxationModel::Exponential => "exponential",
        })
    }
}

/// Which way a fitted curve moves, judged at 95 % from its slope (semi-log b)
/// or amplitude (exponential A) and that parameter's standard error.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Trend {
    /// The voltage falls with time (as after a charge).
    Falling,
    /// The voltage rises with time (as after a discharge).
    Rising,
    /// No direction can be told from the noise.
    Indistinct,
}

/// One fitted model.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ModelFit {
    /// The model.
    pub model: RelaxationModel,
    /// Semi-log: the value at `target_rest`; exponential: the asymptote V∞.
    pub rested_volts: Volts,
    /// 95 % confidence interval of `rested_volts` from the fit (Student's t on
    /// n − p degrees of freedom). The residual variance is floored at the
    /// meter's rounding variance resolution²/12, so a fit can never claim to
    /// be better than the display it was read from.
    pub rested_interval_volts: (Volts, Volts),
    /// Residual standard deviation √(RSS/(n − p)), in millivolts.
    pub residual_sd_mv: f64,
    /// Small-sample Akaike criterion; +∞ when undefined (n ≤ p + 2).
    pub aicc: f64,
    /// Model derivative dV/dt at the last reading, mV/h (negative = falling).
    pub rate_at_last_mv_per_h: f64,
    /// When |dV/dt| falls below the settling limit; `Some(0 h)` if it never
    /// exceeded it; `None` if not within 30 days. For the semi-log model this
    /// may lie before the last reading (already steady).
    pub settled_at_elapsed: Option<Hours>,
    /// Degrees of freedom n − p of the residuals.
    pub degrees_of_freedom: usize,
    /// Which way the fitted curve moves.
    pub trend: Trend,
    /// Fitted parameters with their units in the names:
    /// `a_volts`, `b_volts_per_decade` or `v_inf_volts`, `amplitude_volts`, `tau_hours`.
    pub parameters: Vec<(&'static str, f64)>,
}

/// The result of [`analyse`].
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct SettleAnalysis {
    /// Every model that could be fitted (the semi-log always, the exponential
    /// when it is identified by the data).
    pub fits: Vec<ModelFit>,
    /// The model with the lower AICc (semi-log on a tie).
    pub chosen: RelaxationModel,
    /// (V_n − V_{n−1}) / (t_n − t_{n−1}) from the last two readings, mV/h.
    pub finite_difference_rate_mv_per_h: f64,
    /// The chosen model's |rate at the last reading| is below the settling limit.
    pub settled: bool,
    /// Why a model was not fitted, in words for the report.
    pub notes: Vec<String>,
}

/// A fit of NaNs, returned by [`SettleAnalysis::chosen_fit`] only for a
/// hand-built analysis with no fits: [`analyse`] never produces one.
static NO_FIT: ModelFit = ModelFit {
    model: RelaxationModel::SemiLog,
    rested_volts: Volts(f64::NAN),
    rested_interval_volts: (Volts(f64::NAN), Volts(f64::NAN)),
    residual_sd_mv: f64::NAN,
    aicc: f64::INFINITY,
    rate_at_last_mv_per_h: f64::NAN,
    settled_at_elapsed: None,
    degrees_of_freedom: 0,
    trend: Trend::Indistinct,
    parameters: Vec::new(),
};

impl SettleAnalysis {
    /// The fit of the chosen model.
    pub fn chosen_fit(&self) -> &ModelFit {
        self.fit(self.chosen)
            .or_else(|| self.fits.first())
            .unwrap_or(&NO_FIT)
    }

    /// The fit of a given model, if it was fitted.
    pub fn fit(&self, model: RelaxationModel) -> Option<&ModelFit> {
        self.fits.iter().find(|f| f.model == model)
    }
}

/// Shortest accepted span between the first and last reading: a quarter of an
/// hour. Shorter series show mostly the first seconds-to-minutes transient,
/// which neither model describes (choice of this module, common practice of
/// reading over at least tens of minutes).
pub const MIN_SPAN_HOURS: f64 = 0.25;

/// Smallest accepted ratio last/first elapsed time: the semi-log model needs at
/// least 0.3 decade of log time for its slope to mean anything.
pub const MIN_ELAPSED_RATIO: f64 = 2.0;

/// A fit whose residual SD is above this many times max(resolution, 1 mV) is
/// refused: 2 mV of honest noise passes, a 150 mV spike does not.
pub const RESIDUAL_LIMIT_FACTOR: f64 = 5.0;

/// Why a rest series could not be analysed or read.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SettleError {
    /// Fewer than three readings.
    #[error("only {count} rest reading(s): at least three are needed to fit a settling curve; add readings spread over the rest (for example at 30 min, 1 h and 2 h)")]
    TooFewReadings {
        /// Readings given.
        count: usize,
    },
    /// An elapsed time is zero, negative or not a number.
    #[error("reading {index}: elapsed time {} is not after the end of the charge or discharge; elapsed times count from that end and must be positive", elapsed_text(*elapsed_hours))]
    BadElapsed {
        /// 1-based reading number.
        index: usize,
        /// What was given.
        elapsed_hours: f64,
    },
    /// Times not strictly increasing.
    #[error("reading {index} at {} is not later than reading {} at {}: give the readings in time order, each at a distinct time", elapsed_text(*elapsed_hours), index.saturating_sub(1), elapsed_text(*previous_hours))]
    NotIncreasing {
        /// 1-based reading number.
        index: usize,
        /// Its elapsed time.
        elapsed_hours: f64,
        /// The elapsed time of the reading before.
        previous_hours: f64,
    },
    /// A voltage is NaN or infinite.
    #[error("reading {index}: the voltage is not a finite number; re-enter the reading")]
    NonFiniteVolts {
        /// 1-based reading number.
        index: usize,
    },
    /// Options out of range.
    #[error("settle option {what}")]
    BadOptions {
        /// What is wrong, and what is expected.
        what: String,
    },
    /// The readings cover too little of the rest.
    #[error("the readings cover {} to {} of rest: too short to tell a settling curve (need a span of at least {min_span_minutes} min and the last reading at least {min_ratio}× the first's elapsed time); keep waiting and add later readings", elapsed_text(*first_hours), elapsed_text(*last_hours))]
    SpanTooShort {
        /// Elapsed time of the first reading.
        first_hours: f64,
        /// Elapsed time of the last reading.
        last_hours: f64,
        /// Minimum span, minutes.
        min_span_minutes: f64,
        /// Minimum last/first ratio.
        min_ratio: f64,
    },
    /// The best fit does not follow the readings to within meter noise.
    #[error("the {model} settling curve misses the readings by {residual_sd_mv:.1} mV (SD), more than the {limit_mv:.1} mV a steady meter allows; reading {worst_index} is off by {worst_residual_mv:+.1} mV. Check the leads and contacts, that no load or charger is connected, and re-take that reading")]
    PoorFit {
        /// The model that fitted best.
        model: RelaxationModel,
        /// Its residual SD, mV.
        residual_sd_mv: f64,
        /// The limit, mV.
        limit_mv: f64,
        /// 1-based number of the reading with the largest residual.
        worst_index: usize,
        /// That residual, mV.
        worst_residual_mv: f64,
    },
    /// The curve moves the wrong way for what the rest follows.
    #[error("after a {after} the rest voltage should {expected}, but the readings {actual} (about {rate_mv_per_h:+.1} mV/h at the last reading). Check that the event really was a {after}, that the leads are on the right battery and the right way round, and that nothing is still charging or loading it")]
    WrongDirection {
        /// What the rest follows.
        after: RestAfter,
        /// "fall" or "rise".
        expected: &'static str,
        /// "rise" or "fall".
        actual: &'static str,
        /// The chosen model's rate at the last reading, mV/h.
        rate_mv_per_h: f64,
    },
    /// No model could be fitted at all.
    #[error("no settling curve could be fitted: {reason}; add readings spread over a longer rest")]
    NoFit {
        /// Why.
        reason: String,
    },
    /// The input could not be read.
    #[error("{source_name}: cannot read: {message}")]
    Io {
        /// File name or "stdin".
        source_name: String,
        /// The I/O error.
        message: String,
    },
    /// The header of a rest series file is unusable.
    #[error("{source_name}:{line}: {message}")]
    Header {
        /// File name.
        source_name: String,
        /// Line of the header.
        line: u64,
        /// What is wrong and what is expected.
        message: String,
    },
    /// A field of a rest series file is unusable.
    #[error("{source_name}:{line}: column '{column}': '{value}' is not {expected}")]
    Field {
        /// File name.
        source_name: String,
        /// 1-based line.
        line: u64,
        /// Column name as in the header.
        column: String,
        /// What was there.
        value: String,
        /// What was expected.
        expected: String,
    },
    /// A line of a rest series file is unusable as a whole.
    #[error("{source_name}:{line}: {message}")]
    Line {
        /// File name.
        source_name: String,
        /// 1-based line.
        line: u64,
        /// What is wrong and what is expected.
        message: String,
    },
    /// Timestamps were given without the time the charge or discharge ended.
    #[error("{source_name}: readings are given as taken_at timestamps, but the time the charge or discharge ended is not known; give it (--ended-at 'YYYY-MM-DD HH:MM'), or use a minutes or hours column of elapsed time")]
    NeedEventEnd {
        /// File name.
        source_name: String,
    },
    /// A hand-typed reading could not be read.
    #[error("reading '{arg}': {message}; write it as ELAPSED=VOLTS, like 30m=12.93 or 2h=12,81")]
    ReadingArg {
        /// What was typed.
        arg: String,
        /// What is wrong.
        message: String,
    },
}

impl SettleError {
    /// True when the readings or options as given are unusable (a usage
    /// error), false when they were read but the analysis refuses them
    /// (span, fit, direction).
    pub fn is_input_error(&self) -> bool {
        !matches!(
            self,
            SettleError::SpanTooShort { .. }
                | SettleError::PoorFit { .. }
                | SettleError::WrongDirection { .. }
                | SettleError::NoFit { .. }
                | SettleError::Io { .. }
        )
    }
}

/// An elapsed time as a person would say it: minutes below two hours
/// (`20 min`, `7.5 min`), hours up to four days, days beyond.
pub fn elapsed_text(hours: f64) -> String {
    fn trim(x: f64, decimals: usize) -> String {
        let s = format!("{x:.decimals$}");
        if s.contains('.') {
            s.trim_end_matches('0').trim_end_matches('.').to_string()
        } else {
            s
        }
    }
    if !hours.is_finite() {
        return format!("{hours} h");
    }
    if hours.abs() < 2.0 {
        format!("{} min", trim(hours * 60.0, 1))
    } else if hours.abs() < 96.0 {
        format!("{} h", trim(hours, 2))
    } else {
        format!("{} d", trim(hours / 24.0, 2))
    }
}

fn check_options(opts: &SettleOptions) -> Result<(), SettleError> {
    let bad = |what: String| Err(SettleError::BadOptions { what });
    if !(opts.resolution.0.is_finite() && opts.resolution.0 > 0.0 && opts.resolution.0 <= 1.0) {
        return bad(format!(
            "resolution {} V: expected the meter's display step, a positive number of volts such as 0.001 or 0.01",
            opts.resolution.0
        ));
    }
    if !(opts.target_rest.0.is_finite() && opts.target_rest.0 > 0.0) {
        return bad(format!(
            "target rest {} h: expected a positive rest time such as 24 h",
            opts.target_rest.0
        ));
    }
    if !(opts.settling_limit_mv_per_h.is_finite() && opts.settling_limit_mv_per_h > 0.0) {
        return bad(format!(
            "settling limit {} mV/h: expected a positive rate such as 1 mV/h",
            opts.settling_limit_mv_per_h
        ));
    }
    Ok(())
}

fn check_points(points: &[RestPoint]) -> Result<(), SettleError> {
    if points.len() < 3 {
        return Err(SettleError::TooFewReadings {
            count: points.len(),
        });
    }
    for (i, p) in points.iter().enumerate() {
        let index = i + 1;
        if !(p.elapsed.0.is_finite() && p.elapsed.0 > 0.0) {
            return Err(SettleError::BadElapsed {
                index,
                elapsed_hours: p.elapsed.0,
            });
        }
        if !p.volts.0.is_finite() {
            return Err(SettleError::NonFiniteVolts { index });
        }
        if i > 0 && p.elapsed.0 <= points[i - 1].elapsed.0 {
            return Err(SettleError::NotIncreasing {
                index,
                elapsed_hours: p.elapsed.0,
                previous_hours: points[i - 1].elapsed.0,
            });
        }
    }
    let first = points[0].elapsed.0;
    let last = points[points.len() - 1].elapsed.0;
    if last - first < MIN_SPAN_HOURS || last / first < MIN_ELAPSED_RATIO {
        return Err(SettleError::SpanTooShort {
            first_hours: first,
            last_hours: last,
            min_span_minutes: MIN_SPAN_HOURS * 60.0,
            min_ratio: MIN_ELAPSED_RATIO,
        });
    }
    Ok(())
}

/// Fit both relaxation models to a rest series and judge it.
///
/// Errors (never a panic) on too few or disordered readings, a short span, a
/// fit far outside meter noise or a curve moving the wrong way; see
/// [`SettleError`] and the module documentation.
pub fn analyse(points: &[RestPoint], opts: &SettleOptions) -> Result<SettleAnalysis, SettleError> {
    check_options(opts)?;
    check_points(points)?;
    let t: Vec<f64> = points.iter().map(|p| p.elapsed.0).collect();
    let v: Vec<f64> = points.iter().map(|p| p.volts.0).collect();
    let ctx = fit::FitContext {
        resolution_volts: opts.resolution.0,
        target_rest_hours: opts.target_rest.0,
        settling_limit_mv_per_h: opts.settling_limit_mv_per_h,
    };

    let mut fitted = Vec::new();
    let mut notes = Vec::new();
    match fit::fit_semilog(&t, &v, &ctx) {
        Ok(f) => fitted.push(f),
        Err(why) => notes.push(format!("semi-log model not fitted: {why}")),
    }
    if points.len() >= 4 {
        match fit::fit_exponential(&t, &v, &ctx) {
            Ok(f) => fitted.push(f),
            Err(why) => notes.push(format!("exponential model not fitted: {why}")),
        }
    } else {
        notes.push("exponential model not fitted: it needs at least four readings".into());
    }

    // Lowest AICc; the semi-log comes first, so strict `<` keeps it on a tie.
    let mut best: Option<&fit::Fitted> = None;
    for f in &fitted {
        if best.map_or(true, |b| f.fit.aicc < b.fit.aicc) {
            best = Some(f);
        }
    }
    let best = best.ok_or_else(|| SettleError::NoFit {
        reason: notes.join("; "),
    })?;

    let limit_mv = RESIDUAL_LIMIT_FACTOR * (opts.resolution.0 * 1000.0).max(1.0);
    if best.fit.residual_sd_mv.is_nan() || best.fit.residual_sd_mv > limit_mv {
        let (worst_index, worst) =
            best.residuals_volts
                .iter()
                .enumerate()
                .fold((0, 0.0_f64), |acc, (i, r)| {
                    if r.abs() > acc.1.abs() {
                        (i, *r)
                    } else {
                        acc
                    }
                });
        return Err(SettleError::PoorFit {
            model: best.fit.model,
            residual_sd_mv: best.fit.residual_sd_mv,
            limit_mv,
            worst_index: worst_index + 1,
            worst_residual_mv: worst * 1000.0,
        });
    }

    if let Some(after) = opts.after {
        let wrong = match (after, best.fit.trend) {
            (RestAfter::Charge, Trend::Rising) => Some(("fall", "rise")),
            (RestAfter::Discharge, Trend::Falling) => Some(("rise", "fall")),
            _ => None,
        };
        if let Some((expected, actual)) = wrong {
            return Err(SettleError::WrongDirection {
                after,
                expected,
                actual,
                rate_mv_per_h: best.fit.rate_at_last_mv_per_h,
            });
        }
    }

    let chosen = best.fit.model;
    let settled = best.fit.rate_at_last_mv_per_h.abs() < opts.settling_limit_mv_per_h;
    let n = points.len();
    let finite_difference_rate_mv_per_h = (v[n - 1] - v[n - 2]) / (t[n - 1] - t[n - 2]) * 1000.0;
    Ok(SettleAnalysis {
        fits: fitted.into_iter().map(|f| f.fit).collect(),
        chosen,
        finite_difference_rate_mv_per_h,
        settled,
        notes,
    })
}

#[cfg(test)]
mod tests;
