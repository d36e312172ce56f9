//! Calibration: teach restvolt the curve of a fleet's own batteries from
//! points whose state of charge is known (e.g. from the charge removed in a
//! capacity test against the measured capacity).
//!
//! # Method
//! 1. **To 25 °C.** A rested voltage becomes an OCV per cell at 25 °C with the
//!    base profile's open-circuit coefficient at the point's state of charge:
//!    `v25 = v/cells − coef/1000 · (t − 25)` (coef in mV/K per cell,
//!    [`Profile::ocv_coefficient`]). A hydrometer reading is first referred to
//!    SG 25/25 with the default rule ([`crate::electrolyte::HydrometerRule::default`], 0.001 per
//!    1.67 °C), then turned into the OCV per cell at 25 °C that acid of that
//!    strength gives ([`crate::electrolyte::cell_ocv_25c_from_sg25`]: Laliberté density
//!    → molality → Bode polynomial). An SG point thus calibrates the curve
//!    through the thermodynamics of the acid, not a measured voltage.
//! 2. **Isotonic step.** Points are sorted by state of charge; points at the
//!    same state of charge are averaged (weight = their number). Weighted
//!    pool-adjacent-violators ([`isotonic_fit`]) then gives the least-squares
//!    non-decreasing fit; equal neighbouring levels are pooled, and so are
//!    neighbours rising less than [`MIN_SLOPE_MV_PER_PERCENT`] (a curve flatter
//!    than that cannot tell charge apart, and the profile's temperature check
//!    would refuse it). The first and last levels are pooled with their
//!    neighbours until each holds [`END_MIN_POINTS`] points, because the
//!    isotonic fit at an end rests on whatever extreme point lies there.
//!    Every group the isotonic step itself pooled across different states of
//!    charge is listed as a warning (the end and slope pooling are not: they
//!    are part of the method, not a sign of contradictory data).
//! 3. **Curve.** One point per pooled level, at the weighted mean state of
//!    charge of its block; the profile's monotone cubic
//!    ([`crate::profile::curve::MonotoneCurve`]) interpolates them.
//!    **Criterion for a line:** with fewer than [`MIN_LEVELS_FOR_SHAPE`]
//!    distinct levels the cubic would only draw steps of noise, so a
//!    least-squares line through all points is used instead and two or three
//!    points along it are written (at the lowest, middle and highest state of
//!    charge of the data).
//! 4. **Outside the fitted range** the base profile's curve points are added,
//!    shifted by a constant so that they join the fitted curve at its end
//!    (continuous in value; strictly increasing because the base curve is).
//! 5. **Tolerance.** Residuals (point − final curve, mV per cell) give
//!    `sd = sqrt(Σr² / ν)` with ν the residual degrees of freedom
//!    tr((I − S)ᵀ(I − S)) of the whole fit, S = ∂ŷ/∂y found by nudging each
//!    point and refitting (O(n²) curve evaluations). Dividing by n − k, with k
//!    the number of levels, overstated the SD by 10–25 % in simulation, because
//!    the cubic between block centres is smoother than the isotonic steps.
//!    `tolerance.curve_mv_per_cell` is the half-width of a rectangular
//!    distribution (the corrector takes half-width/√3 as its standard
//!    uncertainty, GUM JCGM 100:2008 §4.3.7), so √3 × SD is written: its
//!    rectangular standard uncertainty is the SD. With ν < 0.5 (the curve
//!    passes through the points) the base profile's tolerance is kept.

pub mod fit;
pub mod input;
pub mod report;

pub use fit::{isotonic_fit, Block};
pub use input::{read_points, CalibrationPoint};
pub use report::{CalibrationReport, FitMethod, PooledGroup, Residual};

use crate::profile::curve::MonotoneCurve;
use crate::profile::schema::{CurveKind, CurveSection, ToleranceSection};
use crate::profile::{Profile, ProfileError, ProfileFile, Sourced};
use crate::units::{Millivolts, SocPercent, Volts};
use sha2::{Digest, Sha256};

/// Fewer distinct pooled levels than this and the covered range is fitted by a line.
pub const MIN_LEVELS_FOR_SHAPE: usize = 4;
/// Neighbouring fitted levels must rise at least this much per percent of charge,
/// per cell. Real curves rise about 1.2–1.7 mV per % per cell (REFERENCES §1.5:
/// 11.89 → 12.65 V over 0–100 % on six cells), so this only pools near-flat noise.
pub const MIN_SLOPE_MV_PER_PERCENT: f64 = 0.25;
/// The first and last fitted levels each pool at least this many points, so
/// that one stray point at an end of the data does not pull the curve there.
pub const END_MIN_POINTS: f64 = 3.0;
/// Below this many points the report warns that the SD is rough.
pub const FEW_POINTS: usize = 8;
/// Below this span of state of charge the report warns that most of the curve is the base's.
pub const NARROW_SPAN_PERCENT: f64 = 50.0;
/// Base points closer than this to a fitted end are left out, so that the
/// join does not crowd two points into a sliver of charge.
const JOIN_GAP_PERCENT: f64 = 1.0;
/// Fewer residual degrees of freedom than this and no SD is reported.
const MIN_RESIDUAL_DF: f64 = 0.5;
/// Two points count as the same when their voltages differ by less than this.
const SAME_VOLTS: f64 = 1e-9;

/// Calibration could not be done.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CalibrateError {
    /// The input could not be read.
    #[error("{file}: {message}")]
    Io {
        /// Input name.
        file: String,
        /// What went wrong.
        message: String,
    },
    /// The CSV structure is broken.
    #[error("{file}:{line}: {message}")]
    Csv {
        /// Input name.
        file: String,
        /// 1-based line.
        line: u64,
        /// The CSV reader's message.
        message: String,
    },
    /// The header lacks a column or repeats one.
    #[error("{file}:{line}: header: {message}")]
    Header {
        /// Input name.
        file: String,
        /// 1-based line of the header (1 for an empty file).
        line: u64,
        /// What is missing and what is expected.
        message: String,
    },
    /// One field could not be used.
    #[error("{file}:{line}: column `{column}`: {message}")]
    Field {
        /// Input name.
        file: String,
        /// 1-based line.
        line: u64,
        /// Column name.
        column: String,
        /// What is wrong and what is expected.
        message: String,
    },
    /// The input holds no data rows.
    #[error("{file}: no data rows below the header")]
    NoData {
        /// Input name.
        file: String,
    },
    /// A point's state of charge lies outside 0–100 %.
    #[error("{file}:{line}: state of charge {} % is outside 0–100 %", crate::units::Shown(*.soc_percent))]
    SocOutOfRange {
        /// Input name.
        file: String,
        /// Input line.
        line: u64,
        /// The value.
        soc_percent: f64,
    },
    /// A point holds NaN or infinity.
    #[error("{file}:{line}: the point is not a finite number")]
    NotFinite {
        /// Input name.
        file: String,
        /// Input line.
        line: u64,
    },
    /// The same point appears twice.
    #[error("{file}: lines {first_line} and {second_line} are the same point ({soc_percent} %, {volts_per_cell:.4} V per cell at 25 °C): remove the copy")]
    Duplicate {
        /// Input name.
        file: String,
        /// The earlier line.
        first_line: u64,
        /// The later line.
        second_line: u64,
        /// Their state of charge.
        soc_percent: f64,
        /// Their OCV per cell at 25 °C.
        volts_per_cell: f64,
    },
    /// Not enough points for a curve.
    #[error("{file}: {points} point(s) at {distinct_soc} distinct state(s) of charge: a curve needs at least two states of charge")]
    TooFewPoints {
        /// Input name.
        file: String,
        /// Number of points.
        points: usize,
        /// Number of distinct states of charge.
        distinct_soc: usize,
    },
    /// The new id is not usable.
    #[error("new profile id '{0}' must be lower-case letters, digits and single hyphens, starting with a letter")]
    BadId(String),
    /// The data do not rise with charge.
    #[error("{file}: the voltage does not rise with state of charge in these data (best line: {mv_per_percent:.3} mV per % per cell, need at least {MIN_SLOPE_MV_PER_PERCENT}); check the soc_percent column")]
    NotRising {
        /// Input name.
        file: String,
        /// Fitted slope.
        mv_per_percent: f64,
    },
    /// The calibrated profile failed validation (a defect or an extreme input).
    #[error("the calibrated profile does not validate: {0}")]
    Profile(#[from] ProfileError),
    /// The TOML could not be written.
    #[error("the calibrated profile could not be written as TOML: {0}")]
    Toml(String),
}

/// What [`calibrate`] needs beyond the points.
#[derive(Clone, Debug, PartialEq)]
pub struct CalibrateOptions {
    /// Id of the new profile (lower-case letters, digits, hyphens).
    pub new_id: String,
    /// Name of the input (file name), for provenance and messages.
    pub input_name: String,
    /// SHA-256 of the input's bytes, lower-case hex ([`sha256_hex`]).
    pub input_sha256: String,
    /// Date of the calibration.
    pub today: chrono::NaiveDate,
}

/// The result: the new profile and the report.
#[derive(Clone, Debug)]
pub struct Calibration {
    /// The new profile, validated.
    pub profile: ProfileFile,
    /// What the fit found.
    pub report: CalibrationReport,
}

impl Calibration {
    /// The new profile as TOML text (loads with [`Profile::from_toml`]).
    pub fn to_toml(&self) -> Result<String, CalibrateError> {
        toml::to_string(&self.profile).map_err(|e| CalibrateError::Toml(e.to_string()))
    }
}

/// SHA-256 of bytes as 64 lower-case hex digits.
pub fn sha256_hex(bytes: &[u8]) -> String {
    Sha256::digest(bytes)
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

fn id_ok(id: &str) -> bool {
    id.starts_with(|c: char| c.is_ascii_lowercase())
        && !id.ends_with('-')
        && !id.contains("--")
        && id
            .chars()
            .all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || c == '-')
}

/// Fit a new profile to `points` on the shape of `base` (see the module
/// documentation for the method). The result is checked to load with
/// [`Profile::from_toml`] before it is returned.
pub fn calibrate(
    points: &[CalibrationPoint],
    base: &Profile,
    opts: &CalibrateOptions,
) -> Result<Calibration, CalibrateError> {
    let file = opts.input_name.as_str();
    if !id_ok(&opts.new_id) {
        return Err(CalibrateError::BadId(opts.new_id.clone()));
    }
    for p in points {
        if !p.soc.is_finite() || !p.volts_per_cell_25c.is_finite() {
            return Err(CalibrateError::NotFinite {
                file: file.into(),
                line: p.line,
            });
        }
        if !(0.0..=100.0).contains(&p.soc.0) {
            return Err(CalibrateError::SocOutOfRange {
                file: file.into(),
                line: p.line,
                soc_percent: p.soc.0,
            });
        }
    }
    let mut sorted = points.to_vec();
    sorted.sort_by(|a, b| {
        a.soc
            .0
            .total_cmp(&b.soc.0)
            .then(a.volts_per_cell_25c.0.total_cmp(&b.volts_per_cell_25c.0))
            .then(a.line.cmp(&b.line))
    });
    for w in sorted.windows(2) {
        if w[0].soc.0 == w[1].soc.0
            && (w[0].volts_per_cell_25c.0 - w[1].volts_per_cell_25c.0).abs() < SAME_VOLTS
        {
            return Err(CalibrateError::Duplicate {
                file: file.into(),
                first_line: w[0].line.min(w[1].line),
                second_line: w[0].line.max(w[1].line),
                soc_percent: w[0].soc.0,
                volts_per_cell: w[0].volts_per_cell_25c.0,
            });
        }
    }

    let Core {
        method,
        extended,
        fitted_parameters,
        pooled,
        soc_min,
        soc_max,
        levels_count,
    } = fit_core(&sorted, base, file, points.len())?;
    let curve_points = extended.points.clone();
    let (first_soc, last_soc) = (extended.fitted_from, extended.fitted_to);
    let (shift_below, shift_above) = (extended.shift_below, extended.shift_above);
    let fitted_count = extended.fitted_count;
    let n = points.len();
    let span = soc_max - soc_min;
    let sha_short: String = opts.input_sha256.chars().take(12).collect();
    let method_note = match method {
        FitMethod::Isotonic => format!(
            "isotonic regression (pool-adjacent-violators) then a monotone cubic through {fitted_count} pooled levels"
        ),
        FitMethod::Linear => format!(
            "least-squares line ({} distinct levels after pooling, fewer than {MIN_LEVELS_FOR_SHAPE})",
            levels_count
        ),
    };
    let mut outside = Vec::new();
    if let Some(shift) = shift_below {
        outside.push(format!(
            "below {first_soc:.1} % the base profile '{}' curve's shape shifted by {:+.1} mV per cell",
            base.id(),
            shift * 1000.0
        ));
    }
    if let Some(shift) = shift_above {
        outside.push(format!(
            "above {last_soc:.1} % the base profile '{}' curve's shape shifted by {:+.1} mV per cell",
            base.id(),
            shift * 1000.0
        ));
    }
    let curve_source = format!(
        "derived: calibration from {n} points in {file} (SHA-256 {sha_short}…, {}): {method_note}, fitted {first_soc:.1}–{last_soc:.1} %{}",
        opts.today,
        if outside.is_empty() {
            String::new()
        } else {
            format!("; {}", outside.join("; "))
        }
    );

    let mut spec = base.spec.clone();
    spec.id = opts.new_id.clone();
    spec.name = format!("{} (calibrated as {})", base.spec.name, opts.new_id);
    spec.description = format!(
        "Calibrated from profile '{}' with {n} known points from {file} on {}. Base: {}",
        base.id(),
        opts.today,
        base.spec.description
    );
    spec.curve = CurveSection {
        kind: CurveKind::Points,
        points: curve_points.clone(),
        source: curve_source,
    };
    let mut provenance = vec![
        format!("input: {file}"),
        format!("input sha256: {}", opts.input_sha256),
        format!("calibrated on: {}", opts.today),
        format!("points: {n}"),
        format!("base profile: {}", base.id()),
    ];
    provenance.extend(
        base.spec
            .provenance
            .iter()
            .map(|l| format!("base provenance: {l}")),
    );
    spec.provenance = provenance;

    // Validate the curve, then measure the residuals on the curve as it will load.
    let origin = format!("calibrated profile '{}'", opts.new_id);
    let loaded = Profile::from_spec(spec.clone(), &origin)?;
    let residuals: Vec<Residual> = sorted
        .iter()
        .map(|p| {
            let c = loaded.curve().volts_at(p.soc);
            Residual {
                line: p.line,
                soc: p.soc,
                volts_per_cell_25c: p.volts_per_cell_25c,
                curve_volts_per_cell_25c: c,
                residual_mv_per_cell: Millivolts((p.volts_per_cell_25c.0 - c.0) * 1000.0),
            }
        })
        .collect();
    let ss: f64 = residuals
        .iter()
        .map(|r| r.residual_mv_per_cell.0.powi(2))
        .sum();
    let fitted_at_points: Vec<f64> = residuals
        .iter()
        .map(|r| r.curve_volts_per_cell_25c.0)
        .collect();
    let residual_df = residual_degrees_of_freedom(&sorted, base, file, &fitted_at_points)?;
    // Below half a degree of freedom the curve all but passes through every
    // point and the residuals say nothing about the spread.
    let residual_sd =
        (residual_df >= MIN_RESIDUAL_DF).then(|| Millivolts((ss / residual_df).sqrt()));

    let mut warnings = Vec::new();
    let (tolerance, tolerance_source) = match residual_sd {
        // The profile holds a rectangular half-width (the corrector divides it
        // by √3), so the SD is written as the half-width whose rectangular
        // standard uncertainty equals it.
        Some(sd) => (
            Millivolts(sd.0 * 3f64.sqrt()),
            format!(
                "derived: half-width √3 × {:.2} mV per cell, the calibration residual SD over {n} points ({residual_df:.1} residual degrees of freedom), {file} on {}, so that its rectangular standard uncertainty (half-width/√3, GUM JCGM 100:2008 §4.3.7) equals the SD",
                sd.0, opts.today
            ),
        ),
        None => {
            let kept = base.spec.tolerance.curve_mv_per_cell.clone();
            warnings.push(format!(
                "{n} points leave no degrees of freedom for a residual SD ({residual_df:.2}; the curve passes through the points): the base profile's tolerance {} mV per cell is kept",
                kept.value
            ));
            (
                Millivolts(kept.value),
                format!(
                    "base profile '{}' value kept (calibration with {n} points left no residual degrees of freedom): {}",
                    base.id(),
                    kept.source
                ),
            )
        }
    };
    spec.tolerance = ToleranceSection {
        curve_mv_per_cell: Sourced {
            value: tolerance.0,
            source: tolerance_source,
        },
    };

    if span < NARROW_SPAN_PERCENT {
        warnings.push(format!(
            "the data span only {span:.1} % of charge ({soc_min:.1}–{soc_max:.1} %), less than {NARROW_SPAN_PERCENT} %: most of the curve is the base profile's shape; test more states of charge"
        ));
    }
    if n < FEW_POINTS {
        warnings.push(format!(
            "only {n} points (fewer than {FEW_POINTS}): the curve and its tolerance rest on little data"
        ));
    }
    if method == FitMethod::Linear {
        warnings.push(format!(
            "only {levels_count} distinct levels after pooling: the covered range is fitted by a straight line"
        ));
    }
    if !pooled.is_empty() {
        let groups: Vec<String> = pooled
            .iter()
            .map(|g| {
                format!(
                    "lines {} ({:.1}–{:.1} %, {:.4} V per cell)",
                    g.lines
                        .iter()
                        .map(|l| l.to_string())
                        .collect::<Vec<_>>()
                        .join(", "),
                    g.soc_from.0,
                    g.soc_to.0,
                    g.level_volts_per_cell_25c.0
                )
            })
            .collect();
        warnings.push(format!(
            "the isotonic step pooled {} group(s) of points whose voltage does not rise with charge (noise, or a wrong state of charge): {}",
            pooled.len(),
            groups.join("; ")
        ));
    }

    let calibration = Calibration {
        profile: spec,
        report: CalibrationReport {
            new_id: opts.new_id.clone(),
            base_id: base.id().to_string(),
            input_name: file.to_string(),
            points: n,
            method,
            soc_min: SocPercent(soc_min),
            soc_max: SocPercent(soc_max),
            fitted_from: SocPercent(first_soc),
            fitted_to: SocPercent(last_soc),
            base_shift_below_mv_per_cell: shift_below.map(|v| Millivolts(v * 1000.0)),
            base_shift_above_mv_per_cell: shift_above.map(|v| Millivolts(v * 1000.0)),
            residuals,
            fitted_parameters,
            residual_degrees_of_freedom: residual_df,
            residual_sd_mv_per_cell: residual_sd,
            tolerance_mv_per_cell: tolerance,
            curve_points,
            pooled,
            warnings,
        },
    };
    // The promise is that the TOML loads: check it here rather than in the caller.
    let text = calibration.to_toml()?;
    Profile::from_toml(&text, &origin)?;
    Ok(calibration)
}

/// The fit without the profile around it, so that it can be rerun on
/// perturbed data to measure its degrees of freedom.
struct Core {
    method: FitMethod,
    extended: Extended,
    fitted_parameters: usize,
    pooled: Vec<PooledGroup>,
    soc_min: f64,
    soc_max: f64,
    levels_count: usize,
}

/// Steps 2–4 of the method on points sorted by state of charge.
fn fit_core(
    sorted: &[CalibrationPoint],
    base: &Profile,
    file: &str,
    input_len: usize,
) -> Result<Core, CalibrateError> {
    // Points at one state of charge are one observation of its level, weighted by their number.
    let mut groups: Vec<Vec<CalibrationPoint>> = Vec::new();
    for p in sorted {
        match groups.last_mut() {
            Some(g) if g[0].soc.0 == p.soc.0 => g.push(*p),
            _ => groups.push(vec![*p]),
        }
    }
    if groups.len() < 2 {
        return Err(CalibrateError::TooFewPoints {
            file: file.into(),
            points: input_len,
            distinct_soc: groups.len(),
        });
    }
    let group_soc: Vec<f64> = groups.iter().map(|g| g[0].soc.0).collect();
    let group_weight: Vec<f64> = groups.iter().map(|g| g.len() as f64).collect();
    let group_mean: Vec<f64> = groups
        .iter()
        .map(|g| g.iter().map(|p| p.volts_per_cell_25c.0).sum::<f64>() / g.len() as f64)
        .collect();

    let blocks = isotonic_fit(&group_mean, &group_weight);
    // Only the isotonic step's own pooling is reported: it marks data that
    // contradict a rising curve. The end and slope pooling below are method.
    let pooled: Vec<PooledGroup> = blocks
        .iter()
        .filter(|b| b.len() > 1)
        .map(|b| PooledGroup {
            lines: groups[b.start..b.end]
                .iter()
                .flatten()
                .map(|p| p.line)
                .collect(),
            soc_from: SocPercent(group_soc[b.start]),
            soc_to: SocPercent(group_soc[b.end - 1]),
            level_volts_per_cell_25c: Volts(b.level),
        })
        .collect();
    let min_slope = MIN_SLOPE_MV_PER_PERCENT / 1000.0;
    let mut levels = fit::enforce_min_slope(&blocks, &group_soc, &group_weight, min_slope);
    let before_ends = levels.len();
    levels = fit::pool_ends(levels, END_MIN_POINTS);
    if levels.len() != before_ends {
        let blocks: Vec<Block> = levels.iter().map(|l| l.block.clone()).collect();
        levels = fit::enforce_min_slope(&blocks, &group_soc, &group_weight, min_slope);
    }
    let soc_min = group_soc[0];
    let soc_max = group_soc[group_soc.len() - 1];

    // The loaded profile must stay increasing at every field temperature; a
    // cubic segment between a shallow step and steep neighbours can dip flat,
    // and the base's SOC-dependent coefficient can then tip it over. Pool the
    // two levels around such a place and try again.
    let (method, extended, fitted_parameters) = loop {
        if levels.len() < MIN_LEVELS_FOR_SHAPE {
            let xs: Vec<f64> = sorted.iter().map(|p| p.soc.0).collect();
            let ys: Vec<f64> = sorted.iter().map(|p| p.volts_per_cell_25c.0).collect();
            let (a, b) =
                fit::least_squares(&xs, &ys).ok_or_else(|| CalibrateError::TooFewPoints {
                    file: file.into(),
                    points: input_len,
                    distinct_soc: groups.len(),
                })?;
            if b < min_slope {
                return Err(CalibrateError::NotRising {
                    file: file.into(),
                    mv_per_percent: b * 1000.0,
                });
            }
            let mut at = vec![soc_min];
            if groups.len() >= 3 {
                at.push(0.5 * (soc_min + soc_max));
            }
            at.push(soc_max);
            let pts: Vec<(f64, f64)> = at.iter().map(|&s| (s, a + b * s)).collect();
            break (FitMethod::Linear, with_base_shape(&pts, base), 2);
        }
        let pts: Vec<(f64, f64)> = levels.iter().map(|l| (l.x_mean, l.block.level)).collect();
        let extended = with_base_shape(&pts, base);
        match first_flat_place(&extended.points, base)? {
            None => break (FitMethod::Isotonic, extended, levels.len()),
            Some(soc) => {
                let i = levels
                    .windows(2)
                    .position(|w| soc <= w[1].x_mean)
                    .unwrap_or(levels.len() - 2);
                let merged = fit::merge_levels(&levels[i], &levels[i + 1]);
                levels.splice(i..i + 2, [merged]);
                let blocks: Vec<Block> = levels.iter().map(|l| l.block.clone()).collect();
                levels = fit::enforce_min_slope(&blocks, &group_soc, &group_weight, min_slope);
            }
        }
    };
    Ok(Core {
        method,
        extended,
        fitted_parameters,
        pooled,
        soc_min,
        soc_max,
        levels_count: levels.len(),
    })
}

/// Residual degrees of freedom tr((I − S)ᵀ(I − S)) of the fit, where S is its
/// Jacobian ∂ŷᵢ/∂yⱼ (the hat matrix of a linear smoother; Hastie & Tibshirani,
/// Generalized Additive Models, 1990, §3.5, from memory), found by moving each
/// point by 1 µV and refitting. Dividing the residual sum of squares by this,
/// not by n − k, accounts for the cubic between block centres being smoother
/// than the isotonic steps whose count k would otherwise be charged in full.
fn residual_degrees_of_freedom(
    sorted: &[CalibrationPoint],
    base: &Profile,
    file: &str,
    fitted_at_points: &[f64],
) -> Result<f64, CalibrateError> {
    const NUDGE_VOLTS: f64 = 1e-6;
    let mut df = 0.0;
    let mut moved = sorted.to_vec();
    for j in 0..sorted.len() {
        moved[j].volts_per_cell_25c.0 += NUDGE_VOLTS;
        let refit = fit_core(&moved, base, file, sorted.len())?;
        let curve = curve_of(&refit.extended.points)?;
        for (i, p) in sorted.iter().enumerate() {
            let s_ij = (curve.volts_at(p.soc).0 - fitted_at_points[i]) / NUDGE_VOLTS;
            let e = if i == j { 1.0 - s_ij } else { -s_ij };
            df += e * e;
        }
        moved[j] = sorted[j];
    }
    Ok(df)
}

fn curve_of(points: &[[f64; 2]]) -> Result<MonotoneCurve, CalibrateError> {
    let pts: Vec<(SocPercent, Volts)> = points
        .iter()
        .map(|[s, v]| (SocPercent(*s), Volts(*v)))
        .collect();
    MonotoneCurve::new(&pts).map_err(|source| {
        CalibrateError::Profile(ProfileError::Curve {
            origin: "calibrated curve".into(),
            source,
        })
    })
}

/// A fitted curve with the base's shape added outside it.
struct Extended {
    points: Vec<[f64; 2]>,
    fitted_from: f64,
    fitted_to: f64,
    shift_below: Option<f64>,
    shift_above: Option<f64>,
    fitted_count: usize,
}

/// Add the base curve's points outside the fitted range, shifted by the
/// offset at the nearest fitted end so that they join it continuously. A
/// constant shift of a strictly increasing curve stays strictly increasing, and
/// every added point lies strictly beyond the fitted end, so the whole stays so.
fn with_base_shape(fitted: &[(f64, f64)], base: &Profile) -> Extended {
    let base_curve = base.curve();
    let base_points = base_curve.points();
    let (first_soc, first_v) = fitted.first().copied().unwrap_or((0.0, 0.0));
    let (last_soc, last_v) = fitted.last().copied().unwrap_or((100.0, 0.0));
    let shift_below = first_v - base_curve.volts_at(SocPercent(first_soc)).0;
    let shift_above = last_v - base_curve.volts_at(SocPercent(last_soc)).0;
    let lo_end = base_curve.soc_min().0;
    let hi_end = base_curve.soc_max().0;
    let below: Vec<[f64; 2]> = base_points
        .iter()
        .filter(|(s, _)| s.0 < first_soc - JOIN_GAP_PERCENT || (s.0 == lo_end && s.0 < first_soc))
        .map(|(s, v)| [s.0, v.0 + shift_below])
        .collect();
    let above: Vec<[f64; 2]> = base_points
        .iter()
        .filter(|(s, _)| s.0 > last_soc + JOIN_GAP_PERCENT || (s.0 == hi_end && s.0 > last_soc))
        .map(|(s, v)| [s.0, v.0 + shift_above])
        .collect();
    Extended {
        fitted_from: first_soc,
        fitted_to: last_soc,
        shift_below: (!below.is_empty()).then_some(shift_below),
        shift_above: (!above.is_empty()).then_some(shift_above),
        fitted_count: fitted.len(),
        points: below
            .into_iter()
            .chain(fitted.iter().map(|&(s, v)| [s, v]))
            .chain(above)
            .collect(),
    }
}

/// Field temperatures at which a loaded profile must stay increasing; the same
/// as [`Profile::from_spec`] checks.
const CHECK_TEMPERATURES_C: [f64; 5] = [-40.0, -20.0, 0.0, 45.0, 60.0];

/// The first state of charge (middle of a 1 % step) where the curve, moved to a
/// field temperature with the base's coefficient, fails to increase; `None` if
/// it increases everywhere. Mirrors the check in [`Profile::from_spec`].
fn first_flat_place(points: &[[f64; 2]], base: &Profile) -> Result<Option<f64>, CalibrateError> {
    let curve = curve_of(points)?;
    let coef: Vec<f64> = (0..=100)
        .map(|i| base.ocv_coefficient(SocPercent(f64::from(i))).0 / 1000.0)
        .collect();
    for t in CHECK_TEMPERATURES_C {
        let mut prev = f64::NEG_INFINITY;
        for i in 0..=100 {
            let soc = f64::from(i);
            let v = curve.volts_at(SocPercent(soc)).0 + coef[i as usize] * (t - 25.0);
            if v <= prev {
                return Ok(Some(soc - 0.5));
            }
            prev = v;
        }
    }
    Ok(None)
}

#[cfg(test)]
mod tests;
