//! The profile store: chemistry-specific voltage-to-charge curves and the rules
//! that go with them.
//!
//! A profile is a TOML file ([`schema::ProfileFile`]). Built-in profiles live in
//! `profiles/` and are embedded at build time; user profiles come from a
//! directory and override a built-in of the same id ([`store`]). Loading
//! validates every value and builds a [`curve::MonotoneCurve`].

pub mod curve;
pub mod schema;
pub mod store;

use crate::electrolyte::{self, ElectrolyteError};
use crate::units::{Celsius, MillivoltsPerKelvin, SocPercent, SpecificGravity, Volts};
use curve::{CurveError, MonotoneCurve, SocLookup};
use schema::{CoefficientKind, CurveKind};
pub use schema::{Family, ProfileFile, Sourced};

/// A profile could not be loaded or used.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ProfileError {
    /// The TOML could not be read or does not match the schema.
    #[error("{origin}:{line}: {message}")]
    Syntax {
        /// File name or built-in name.
        origin: String,
        /// 1-based line of the problem.
        line: usize,
        /// What the TOML reader said.
        message: String,
    },
    /// A value is out of its allowed range.
    #[error("{origin}: key `{key}`: {problem}")]
    Invalid {
        /// File name or built-in name.
        origin: String,
        /// Dotted key path.
        key: String,
        /// What is wrong and what is expected.
        problem: String,
    },
    /// The curve could not be built.
    #[error("{origin}: key `curve`: {source}")]
    Curve {
        /// File name or built-in name.
        origin: String,
        /// The curve's complaint.
        source: CurveError,
    },
    /// The electrolyte chain failed while deriving the curve.
    #[error("{origin}: deriving the curve from the electrolyte: {source}")]
    Electrolyte {
        /// File name or built-in name.
        origin: String,
        /// The electrolyte's complaint.
        source: ElectrolyteError,
    },
    /// No profile with that id.
    #[error("unknown profile '{id}'{}; `restvolt profiles list` shows the ids", suggestion.as_ref().map(|s| format!(" (did you mean '{s}'?)")).unwrap_or_default())]
    Unknown {
        /// The id asked for.
        id: String,
        /// The nearest known id, if one is close.
        suggestion: Option<String>,
    },
    /// A file or directory could not be read.
    #[error("{path}: {message}")]
    Io {
        /// The path.
        path: String,
        /// The system's message.
        message: String,
    },
    /// A hydrometer reading was given for a profile without accessible electrolyte.
    #[error(
        "profile '{0}' is valve-regulated: its electrolyte cannot be sampled with a hydrometer"
    )]
    NoHydrometer(String),
}

/// A loaded, validated profile.
#[derive(Clone, Debug)]
pub struct Profile {
    /// The file as written (for `show` and JSON output).
    pub spec: ProfileFile,
    /// Where it was loaded from ("built-in" or a path).
    pub origin: String,
    curve: MonotoneCurve,
    /// The open-circuit temperature coefficient tabulated at every
    /// [`COEFFICIENT_STEP_PERCENT`] of charge (empty for a fixed coefficient):
    /// it is looked up for every reading of a fleet, and the electrolyte model
    /// behind it inverts the Laliberté density each time.
    coefficient_table_mv_per_k: Vec<f64>,
    /// The coefficient (mV/K) at the curve's lowest and highest state of
    /// charge, as [`Profile::coefficient_and_slope`] gives it: whether a
    /// reading lies on the curve at all is decided at the ends for every
    /// reading, and there the curve's voltage is its end point's.
    coefficient_at_ends_mv_per_k: (f64, f64),
    /// The greatest |dk/dSOC| of the tabulated coefficient, mV/K per %
    /// (0 for a fixed one): with the curve's bounds it bounds the referral's
    /// Newton error.
    coefficient_slope_max_mv_per_k_per_pct: f64,
    /// [`Profile::freezing_point_at`] 0 %, the highest over the charge range.
    warmest_freezing_point: Option<Celsius>,
    /// The coefficient (mV/K) at the states of charge of the curve's inverse
    /// table (empty for a fixed coefficient): the coefficient by 25 °C
    /// voltage, from which the referral's first guess is read.
    coefficient_by_volts_mv_per_k: Vec<f64>,
    /// The preferred rest (h) when loaded and its log10, for the rest
    /// allowance's semi-log form, which every reading evaluates.
    preferred_rest_log10: (f64, f64),
}

/// How close to its root the referral to 25 °C ends, in % of charge.
const REFERRAL_TOLERANCE_PERCENT: f64 = 1e-10;

/// A rest voltage referred to 25 °C by [`Profile::refer_to_25c`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Referred {
    /// The state of charge it gives (clamped at the curve's ends, with by how much beyond).
    pub lookup: SocLookup,
    /// The per-cell open-circuit voltage at 25 °C.
    pub ocv25: Volts,
    /// The temperature coefficient used, at that state of charge (the
    /// tabulated one as the solver reads it: [`Profile::ocv_coefficient`]
    /// to within rounding).
    pub coefficient: MillivoltsPerKelvin,
}

/// Spacing of the tabulated temperature coefficient, in percent of charge.
const COEFFICIENT_STEP_PERCENT: f64 = 0.1;
/// Its reciprocal, table steps per percent of charge.
const COEFFICIENT_STEPS_PER_PERCENT: f64 = 10.0;

/// Points at which a derived curve is sampled before interpolation.
const DERIVED_STEP_PERCENT: f64 = 5.0;

impl Profile {
    /// Parse and validate a profile from TOML text; `origin` names it in messages.
    pub fn from_toml(text: &str, origin: &str) -> Result<Profile, ProfileError> {
        if text.trim_start_matches('\u{feff}').trim().is_empty() {
            return Err(ProfileError::Syntax {
                origin: origin.to_string(),
                line: 1,
                message: "the file is empty: expected a profile in TOML (id, name, family, cells, [curve], …; copy one of the shipped profiles/*.toml)".into(),
            });
        }
        let spec: ProfileFile = toml::from_str(text).map_err(|e| ProfileError::Syntax {
            origin: origin.to_string(),
            line: toml_error_line(text, &e),
            message: e.message().to_string(),
        })?;
        Profile::from_spec(spec, origin)
    }

    /// Validate an already parsed profile.
    pub fn from_spec(spec: ProfileFile, origin: &str) -> Result<Profile, ProfileError> {
        validate(&spec, origin)?;
        let curve = build_curve(&spec, origin)?;
        let mut profile = Profile {
            spec,
            origin: origin.to_string(),
            curve,
            coefficient_table_mv_per_k: Vec::new(),
            coefficient_at_ends_mv_per_k: (0.0, 0.0),
            coefficient_slope_max_mv_per_k_per_pct: 0.0,
            warmest_freezing_point: None,
            coefficient_by_volts_mv_per_k: Vec::new(),
            preferred_rest_log10: (f64::NAN, f64::NAN),
        };
        if !matches!(profile.spec.temperature.coefficient, CoefficientKind::Fixed)
            || profile.spec.temperature.ocv_mv_per_k_per_cell.is_none()
        {
            let steps = (100.0 / COEFFICIENT_STEP_PERCENT).round() as usize;
            profile.coefficient_table_mv_per_k = (0..=steps)
                .map(|k| {
                    profile
                        .ocv_coefficient_from_model(SocPercent(k as f64 * COEFFICIENT_STEP_PERCENT))
                        .0
                })
                .collect();
        }
        let preferred = profile.preferred_rest_hours();
        profile.preferred_rest_log10 = (preferred, preferred.log10());
        profile.warmest_freezing_point = profile.freezing_point_at(SocPercent(0.0)).ok();
        if profile.coefficient_table_mv_per_k.len() >= 2 {
            profile.coefficient_by_volts_mv_per_k = profile
                .curve
                .table_socs()
                .iter()
                .map(|&s| profile.ocv_coefficient(SocPercent(s)).0)
                .collect();
        }
        profile.coefficient_slope_max_mv_per_k_per_pct = profile
            .coefficient_table_mv_per_k
            .windows(2)
            .map(|w| ((w[1] - w[0]) / COEFFICIENT_STEP_PERCENT).abs())
            .fold(0.0, f64::max);
        profile.coefficient_at_ends_mv_per_k = (
            profile.coefficient_and_slope(profile.curve.soc_min().0).0,
            profile.coefficient_and_slope(profile.curve.soc_max().0).0,
        );
        // A temperature coefficient must keep the curve increasing over the
        // field range, or the inverse would not be unique.
        for t in [-40.0, -20.0, 0.0, 45.0, 60.0] {
            let mut prev = f64::NEG_INFINITY;
            for i in 0..=100 {
                let v = profile.ocv_per_cell_at(SocPercent(i as f64), Celsius(t)).0;
                if v <= prev {
                    return Err(invalid(
                        origin,
                        "temperature",
                        format!("the curve stops increasing at {t} °C near {i} %: coefficient too large"),
                    ));
                }
                prev = v;
            }
        }
        Ok(profile)
    }

    /// The profile's id.
    pub fn id(&self) -> &str {
        &self.spec.id
    }

    /// Chemistry family.
    pub fn family(&self) -> Family {
        self.spec.family
    }

    /// Default cells in series per unit.
    pub fn cells(&self) -> u32 {
        self.spec.cells.value
    }

    /// The curve at 25 °C.
    pub fn curve(&self) -> &MonotoneCurve {
        &self.curve
    }

    /// Electrolyte SG 25/25 at a state of charge (linear between the discharged and full values:
    /// acid is consumed in proportion to the charge removed; common practice).
    pub fn sg_at(&self, soc: SocPercent) -> SpecificGravity {
        let (lo, hi) = self.sg_range();
        SpecificGravity(lo.0 + (hi.0 - lo.0) * soc.0.clamp(0.0, 100.0) / 100.0)
    }

    /// State of charge from an electrolyte SG 25/25 (unclamped, so callers can see readings beyond the ends).
    pub fn soc_from_sg(&self, sg: SpecificGravity) -> SocPercent {
        let (lo, hi) = self.sg_range();
        SocPercent((sg.0 - lo.0) / (hi.0 - lo.0) * 100.0)
    }

    /// (discharged, full-charge) SG 25/25.
    pub fn sg_range(&self) -> (SpecificGravity, SpecificGravity) {
        (
            SpecificGravity(self.spec.electrolyte.discharged_sg.value),
            SpecificGravity(self.spec.electrolyte.full_charge_sg.value),
        )
    }

    /// Whether a hydrometer can be used on this type.
    pub fn hydrometer_usable(&self) -> bool {
        !self.spec.family.valve_regulated()
    }

    /// Rest-voltage temperature coefficient per cell at a state of charge.
    /// This is the open-circuit coefficient, never a charging-voltage compensation.
    /// Between 0 and 100 % it is interpolated linearly in a table made at
    /// load from the electrolyte model (within 1e-4 mV/K of the model: see the
    /// tests); a fixed coefficient is returned as given.
    pub fn ocv_coefficient(&self, soc: SocPercent) -> MillivoltsPerKelvin {
        let table = &self.coefficient_table_mv_per_k;
        if table.len() < 2 {
            return self.ocv_coefficient_from_model(soc);
        }
        let x = if soc.0.is_nan() {
            0.0
        } else {
            soc.0.clamp(0.0, 100.0) / COEFFICIENT_STEP_PERCENT
        };
        // x ≥ 0, so truncation is the floor, without a call to libm's; and
        // through i64, whose conversions cost an instruction where usize's
        // cost several (the numbers are the same).
        let i = (x as i64).min(table.len() as i64 - 2);
        let f = x - i as f64;
        let i = i as usize;
        MillivoltsPerKelvin(table[i] + (table[i + 1] - table[i]) * f)
    }

    /// The coefficient from the profile: the fixed value, or the electrolyte model at the SG of this charge.
    fn ocv_coefficient_from_model(&self, soc: SocPercent) -> MillivoltsPerKelvin {
        match (
            self.spec.temperature.coefficient,
            &self.spec.temperature.ocv_mv_per_k_per_cell,
        ) {
            (CoefficientKind::Fixed, Some(c)) => MillivoltsPerKelvin(c.value),
            _ => electrolyte::molality_from_sg25(self.sg_at(soc))
                .and_then(electrolyte::ocv_temperature_coefficient)
                // The SG range is validated at load, so this fallback is never
                // expected; 0.2 mV/K is the mid-range value of REFERENCES §1.3.
                .unwrap_or(MillivoltsPerKelvin(0.2)),
        }
    }

    /// OCV per cell at a state of charge and electrolyte temperature.
    pub fn ocv_per_cell_at(&self, soc: SocPercent, t: Celsius) -> Volts {
        let v25 = self.curve.volts_at(soc);
        Volts(v25.0 + self.ocv_coefficient(soc).0 / 1000.0 * (t.0 - 25.0))
    }

    /// State of charge from an OCV per cell already referred to 25 °C.
    pub fn soc_from_ocv25(&self, volts_per_cell: Volts) -> SocLookup {
        self.curve.soc_at(volts_per_cell)
    }

    /// A rest voltage per cell read at `t`, referred to 25 °C: the state of
    /// charge `s` whose open-circuit voltage at `t` is the reading, that is
    /// `V25(s) + k(s)·(t − 25 °C) = v` with `k` the coefficient at `s`, and
    /// then `v − k(s)·(t − 25 °C)`. Solved as one equation
    /// (`curve::bracketed_newton`), to 1e-10 % of charge: it stops when a
    /// bound on Newton's error (from the curve's curvature and least slope)
    /// says so, which from the first guess here is mostly after one step.
    /// Beyond the curve's ends the state of charge clamps and the coefficient
    /// is the end's.
    pub fn refer_to_25c(&self, volts_per_cell: Volts, t: Celsius) -> Referred {
        let v = volts_per_cell.0;
        let dt = (t.0 - 25.0) / 1000.0;
        let (s_lo, s_hi) = (self.curve.soc_min().0, self.curve.soc_max().0);
        let at_end = |s: f64| {
            let coefficient = self.ocv_coefficient(SocPercent(s));
            let ocv25 = Volts(v - coefficient.0 * dt);
            Referred {
                lookup: self.curve.soc_at(ocv25),
                ocv25,
                coefficient,
            }
        };
        // Whether the reading lies on the curve at all is the sign of g (see
        // below) at the ends, taken without evaluating the curve: its Bézier
        // gives the end points exactly there (nt = 0 and 1, tested).
        let (k_lo, k_hi) = self.coefficient_at_ends_mv_per_k;
        let (v_lo, v_hi) = (self.curve.volts_min().0, self.curve.volts_max().0);
        if v.is_nan() || v_lo + k_lo * dt - v >= 0.0 {
            return at_end(s_lo);
        }
        if v_hi + k_hi * dt - v <= 0.0 {
            return at_end(s_hi);
        }
        // The first guess solves the same equation by 25 °C voltage w on the
        // inverse table: w + K(w)·dt = v, with K the coefficient tabulated by
        // voltage (each look-up gives K and its slope), then s = S(w). That
        // leaves the one Newton step on g below mostly enough (see `close`).
        // A fixed coefficient gives w outright.
        let (k_fixed, _) = self.coefficient_at_ends_mv_per_k;
        let kt = &self.coefficient_by_volts_mv_per_k;
        let mut w = v - k_fixed * dt;
        if kt.len() >= 2 {
            // Two Newton steps from w = v.
            w = v;
            for _ in 0..2 {
                let Some((i, f)) = self.curve.table_position(w) else {
                    break;
                };
                let rise = kt[i + 1] - kt[i];
                let k_per_volt = rise * self.curve.table_scale();
                w -= (w + (kt[i] + rise * f) * dt - v) / (1.0 + k_per_volt * dt);
            }
        }
        let first = self.curve.guess(w);
        let s = first.map_or(0.5 * (s_lo + s_hi), |guess| guess.soc);
        let s = if s.is_finite() {
            s.clamp(s_lo, s_hi)
        } else {
            0.5 * (s_lo + s_hi)
        };
        let hint = first.map_or(0, |guess| guess.segment);
        // g(s) = V25(s) + k(s)·dt − v rises with s (the load check keeps the
        // curve increasing at field temperatures). Each evaluation notes its
        // segment (the next one tries it first) and the stretch around s on
        // which g is one smooth piece (one curve segment, one coefficient
        // cell), which the Newton error bound below needs.
        let segment = std::cell::Cell::new(hint);
        let piece = std::cell::Cell::new((s_lo, s_lo));
        // The coefficient where g was last evaluated: its slope and cell.
        let last = std::cell::Cell::new((f64::NAN, 0.0, 0.0, (0.0, 0.0)));
        let g = |s: f64| {
            let s = s.clamp(s_lo, s_hi);
            let i = self.curve.segment_near(s, segment.get());
            segment.set(i);
            let (v25, slope) = self.curve.volts_and_slope_on(s, i);
            let (k, k_slope, (cell_lo, cell_hi)) = self.coefficient_slope_and_cell(s);
            last.set((s, k, k_slope, (cell_lo, cell_hi)));
            let (seg_lo, seg_hi) = self.curve.segment_span(i);
            // Plain comparisons: none of these is NaN, and f64::max pays for NaN.
            piece.set((
                if seg_lo > cell_lo { seg_lo } else { cell_lo },
                if seg_hi < cell_hi { seg_hi } else { cell_hi },
            ));
            (v25 + k * dt - v, slope + k_slope * dt)
        };
        // On one piece g'' is the curve's (the coefficient is linear there),
        // and g' is at least the curve's least slope less the coefficient's
        // steepest change times dt.
        let (curvature, slope) = self.curve.curvature_and_slope_bounds();
        let factor = curve::newton_error_factor(
            curvature,
            slope - self.coefficient_slope_max_mv_per_k_per_pct * dt.abs(),
        );
        let close = |x: f64, next: f64| {
            let (lo, hi) = piece.get();
            (lo..=hi).contains(&next)
                && factor * (next - x) * (next - x) <= REFERRAL_TOLERANCE_PERCENT
        };
        let s = curve::bracketed_newton(g, (s_lo, s_hi), s, REFERRAL_TOLERANCE_PERCENT, close);
        // The coefficient at s: mostly on the straight piece of the table
        // where g was last evaluated, so read along it from there instead of
        // looking it up again (the same line; they differ by rounding).
        let (x, k_x, k_slope, (cell_lo, cell_hi)) = last.get();
        let coefficient = MillivoltsPerKelvin(if cell_lo <= s && s <= cell_hi {
            k_x + k_slope * (s - x)
        } else {
            self.coefficient_and_slope(s).0
        });
        Referred {
            lookup: SocLookup {
                soc: SocPercent(s),
                beyond: None,
            },
            ocv25: Volts(v - coefficient.0 * dt),
            coefficient,
        }
    }

    /// The coefficient (mV/K) and its slope with charge (mV/K per %): the
    /// tabulated coefficient is piecewise linear, a fixed one flat.
    fn coefficient_and_slope(&self, soc: f64) -> (f64, f64) {
        let (k, slope, _) = self.coefficient_slope_and_cell(soc);
        (k, slope)
    }

    /// [`Profile::coefficient_and_slope`], and the states of charge between
    /// which the coefficient is that one straight line (everywhere for a
    /// fixed one).
    #[inline]
    fn coefficient_slope_and_cell(&self, soc: f64) -> (f64, f64, (f64, f64)) {
        let table = &self.coefficient_table_mv_per_k;
        if table.len() < 2 {
            let k = self.ocv_coefficient_from_model(SocPercent(soc)).0;
            return (k, 0.0, (f64::NEG_INFINITY, f64::INFINITY));
        }
        // A solver's view of the coefficient: multiplying by the steps per
        // percent, where `ocv_coefficient` divides by the step, keeps a
        // division off each Newton step's path; the two differ by rounding.
        let x = soc.clamp(0.0, 100.0) * COEFFICIENT_STEPS_PER_PERCENT;
        let i = (x as i64).min(table.len() as i64 - 2);
        let (start, f) = (i as f64, x - i as f64);
        let i = i as usize;
        let rise = table[i + 1] - table[i];
        let cell = (
            start * COEFFICIENT_STEP_PERCENT,
            (start + 1.0) * COEFFICIENT_STEP_PERCENT,
        );
        (
            table[i] + rise * f,
            rise * COEFFICIENT_STEPS_PER_PERCENT,
            cell,
        )
    }

    /// Freezing point of the electrolyte at a state of charge.
    pub fn freezing_point_at(&self, soc: SocPercent) -> Result<Celsius, ElectrolyteError> {
        electrolyte::freezing_point(self.sg_at(soc))
    }

    /// The highest freezing point at any state of charge, that of the
    /// discharged electrolyte (the SG rises with charge, and the freezing
    /// point falls with SG): kept from load, so that a warm reading can skip
    /// the look-up. `None` if the model refused the discharged SG.
    pub fn warmest_freezing_point(&self) -> Option<Celsius> {
        self.warmest_freezing_point
    }

    /// Minimum rest before a reading is trusted.
    pub fn minimum_rest_hours(&self) -> f64 {
        self.spec.rest.minimum_hours.value
    }

    /// Preferred rest.
    pub fn preferred_rest_hours(&self) -> f64 {
        self.spec.rest.preferred_hours.value
    }

    /// log10 of [`Profile::preferred_rest_hours`], kept from load (and
    /// taken afresh should the spec have been changed since).
    pub fn preferred_rest_log10(&self) -> f64 {
        let (hours, log) = self.preferred_rest_log10;
        let now = self.preferred_rest_hours();
        if hours == now {
            log
        } else {
            now.log10()
        }
    }
}

/// The 1-based line of `text` a TOML error points at (1 when it has no position).
pub fn toml_error_line(text: &str, e: &toml::de::Error) -> usize {
    // Counted on bytes: a span need not fall on a character boundary.
    e.span()
        .map(|s| {
            let upto = &text.as_bytes()[..s.start.min(text.len())];
            upto.iter().filter(|&&b| b == b'\n').count() + 1
        })
        .unwrap_or(1)
}

fn invalid(origin: &str, key: &str, problem: String) -> ProfileError {
    ProfileError::Invalid {
        origin: origin.to_string(),
        key: key.to_string(),
        problem,
    }
}

fn check_range(
    origin: &str,
    key: &str,
    v: f64,
    lo: f64,
    hi: f64,
    unit: &str,
) -> Result<(), ProfileError> {
    if !v.is_finite() {
        return Err(invalid(origin, key, "is not a finite number".into()));
    }
    if v < lo || v > hi {
        return Err(invalid(
            origin,
            key,
            format!(
                "{} is outside the allowed range {lo}–{hi} {unit}",
                crate::units::Shown(v)
            ),
        ));
    }
    Ok(())
}

/// Allowed range of every numeric value: (key, value, low, high, unit).
type RangeRow<'a> = (&'static str, f64, f64, f64, &'static str);

fn ranges(s: &ProfileFile) -> Vec<RangeRow<'_>> {
    let (e, r, t) = (&s.electrolyte, &s.rest, &s.thresholds);
    let mut rows = vec![
        (
            "electrolyte.full_charge_sg.value",
            e.full_charge_sg.value,
            1.0,
            1.4,
            "",
        ),
        (
            "electrolyte.discharged_sg.value",
            e.discharged_sg.value,
            1.0,
            1.4,
            "",
        ),
        (
            "rest.minimum_hours.value",
            r.minimum_hours.value,
            0.0,
            720.0,
            "h",
        ),
        (
            "rest.preferred_hours.value",
            r.preferred_hours.value,
            0.1,
            720.0,
            "h",
        ),
        (
            "rest.settling_limit_mv_per_h.value",
            r.settling_limit_mv_per_h.value,
            0.01,
            100.0,
            "mV/h",
        ),
        (
            "rest.surface_charge_mv_per_cell_at_1h.value",
            r.surface_charge_mv_per_cell_at_1h.value,
            0.0,
            500.0,
            "mV",
        ),
        (
            "rest.recovery_mv_per_cell_at_1h.value",
            r.recovery_mv_per_cell_at_1h.value,
            0.0,
            500.0,
            "mV",
        ),
        (
            "thresholds.recharge_below_soc_percent.value",
            t.recharge_below_soc_percent.value,
            0.0,
            100.0,
            "%",
        ),
        (
            "thresholds.urgent_below_soc_percent.value",
            t.urgent_below_soc_percent.value,
            0.0,
            100.0,
            "%",
        ),
        (
            "thresholds.beyond_full_allowance_mv_per_cell.value",
            t.beyond_full_allowance_mv_per_cell.value,
            0.0,
            500.0,
            "mV",
        ),
        (
            "tolerance.curve_mv_per_cell.value",
            s.tolerance.curve_mv_per_cell.value,
            0.0,
            200.0,
            "mV",
        ),
        (
            "self_discharge.soc_percent_per_30_days_at_25c.value",
            s.self_discharge.soc_percent_per_30_days_at_25c.value,
            0.0,
            50.0,
            "%",
        ),
    ];
    if let (CoefficientKind::Fixed, Some(c)) = (
        s.temperature.coefficient,
        &s.temperature.ocv_mv_per_k_per_cell,
    ) {
        rows.push((
            "temperature.ocv_mv_per_k_per_cell.value",
            c.value,
            -2.0,
            2.0,
            "mV/K per cell (an OCV coefficient; the −3 mV/K charging compensation does not belong here)",
        ));
    }
    if let Some(f) = &s.float {
        rows.extend([
            (
                "float.window_low_volts_per_cell.value",
                f.window_low_volts_per_cell.value,
                2.0,
                2.6,
                "V",
            ),
            (
                "float.window_high_volts_per_cell.value",
                f.window_high_volts_per_cell.value,
                2.0,
                2.6,
                "V",
            ),
            (
                "float.minimum_volts_per_cell.value",
                f.minimum_volts_per_cell.value,
                2.0,
                2.6,
                "V",
            ),
            (
                "float.compensation_mv_per_k_per_cell.value",
                f.compensation_mv_per_k_per_cell.value,
                -10.0,
                0.0,
                "mV/K",
            ),
            (
                "float.compensation_max_celsius.value",
                f.compensation_max_celsius.value,
                0.0,
                70.0,
                "°C",
            ),
            (
                "float.compensation_min_celsius.value",
                f.compensation_min_celsius.value,
                -40.0,
                25.0,
                "°C",
            ),
            (
                "float.expected_current_ma_per_ah.value",
                f.expected_current_ma_per_ah.value,
                0.0,
                100.0,
                "mA/Ah",
            ),
        ]);
    }
    rows
}

/// Longest profile id: ids are typed (`--profile`) and printed in tables.
pub const MAX_ID_CHARS: usize = 64;

fn validate(s: &ProfileFile, origin: &str) -> Result<(), ProfileError> {
    let id_ok = !s.id.is_empty()
        && s.id.len() <= MAX_ID_CHARS
        && s.id
            .chars()
            .all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || c == '-');
    if !id_ok {
        return Err(invalid(
            origin,
            "id",
            format!(
                "'{}' must be 1–{MAX_ID_CHARS} lower-case letters, digits and hyphens",
                crate::units::clip(&s.id)
            ),
        ));
    }
    if s.cells.value == 0 || s.cells.value > 400 {
        return Err(invalid(
            origin,
            "cells.value",
            format!("{} cells: expected 1–400", s.cells.value),
        ));
    }
    if let Some(f) = &s.float {
        let c = f.compensation_mv_per_k_per_cell.value;
        // Before the range check, so 0 and positive values get this message.
        // Common practice: a float charger lowers its voltage as the battery
        // warms (about −3 mV/K per cell); none, or the other way, overcharges
        // a warm battery.
        if c >= 0.0 {
            return Err(invalid(
                origin,
                "float.compensation_mv_per_k_per_cell.value",
                format!(
                    "{c} mV/K per cell: a float compensation must be negative, as the float voltage is lowered when the battery warms (typically about -3 mV/K per cell)"
                ),
            ));
        }
    }
    for (key, v, lo, hi, unit) in ranges(s) {
        check_range(origin, key, v, lo, hi, unit)?;
    }
    let e = &s.electrolyte;
    if e.discharged_sg.value >= e.full_charge_sg.value {
        return Err(invalid(
            origin,
            "electrolyte",
            format!(
                "SG range inverted: discharged {} must be below full charge {}",
                e.discharged_sg.value, e.full_charge_sg.value
            ),
        ));
    }
    if s.rest.minimum_hours.value > s.rest.preferred_hours.value {
        return Err(invalid(
            origin,
            "rest",
            "minimum_hours must not exceed preferred_hours".into(),
        ));
    }
    let t = &s.thresholds;
    if t.urgent_below_soc_percent.value > t.recharge_below_soc_percent.value {
        return Err(invalid(
            origin,
            "thresholds",
            "urgent_below_soc_percent must not exceed recharge_below_soc_percent".into(),
        ));
    }
    if let Some(f) = &s.float {
        if f.window_low_volts_per_cell.value >= f.window_high_volts_per_cell.value {
            return Err(invalid(
                origin,
                "float",
                "window_low must be below window_high".into(),
            ));
        }
    }
    match (
        s.temperature.coefficient,
        &s.temperature.ocv_mv_per_k_per_cell,
    ) {
        (CoefficientKind::Fixed, None) => {
            return Err(invalid(
                origin,
                "temperature.ocv_mv_per_k_per_cell",
                "required when coefficient = \"fixed\"".into(),
            ))
        }
        (CoefficientKind::Electrolyte, Some(_)) => {
            return Err(invalid(
                origin,
                "temperature.ocv_mv_per_k_per_cell",
                "only allowed with coefficient = \"fixed\"".into(),
            ))
        }
        _ => {}
    }
    match s.curve.kind {
        CurveKind::Derived if !s.curve.points.is_empty() => Err(invalid(
            origin,
            "curve.points",
            "a derived curve takes no points (use kind = \"points\")".into(),
        )),
        CurveKind::Points if s.curve.points.is_empty() => Err(invalid(
            origin,
            "curve.points",
            "kind = \"points\" needs at least two [soc_percent, volts_per_cell] points".into(),
        )),
        _ => Ok(()),
    }
}

fn build_curve(s: &ProfileFile, origin: &str) -> Result<MonotoneCurve, ProfileError> {
    let points: Vec<(SocPercent, Volts)> = match s.curve.kind {
        CurveKind::Points => s
            .curve
            .points
            .iter()
            .map(|[soc, v]| (SocPercent(*soc), Volts(*v)))
            .collect(),
        CurveKind::Derived => {
            let (lo, hi) = (
                s.electrolyte.discharged_sg.value,
                s.electrolyte.full_charge_sg.value,
            );
            let steps = (100.0 / DERIVED_STEP_PERCENT).round() as usize;
            let mut pts = Vec::with_capacity(steps + 1);
            for i in 0..=steps {
                let soc = i as f64 * DERIVED_STEP_PERCENT;
                let sg = SpecificGravity(lo + (hi - lo) * soc / 100.0);
                let v = electrolyte::cell_ocv_25c_from_sg25(sg).map_err(|source| {
                    ProfileError::Electrolyte {
                        origin: origin.to_string(),
                        source,
                    }
                })?;
                pts.push((SocPercent(soc), v));
            }
            pts
        }
    };
    MonotoneCurve::new(&points).map_err(|source| ProfileError::Curve {
        origin: origin.to_string(),
        source,
    })
}

#[cfg(test)]
mod tests {
    use super::store::ProfileStore;
    use super::*;

    fn automotive() -> Profile {
        ProfileStore::builtin()
            .unwrap()
            .get("flooded-automotive")
            .unwrap()
            .clone()
    }

    #[test]
    fn referring_to_25c_solves_the_temperature_equation() {
        // Derived: the state of charge found must give back the reading
        // through the forward model, V25(s) + k(s)·(t − 25) = v, and the
        // referred voltage must be v − k(s)·(t − 25).
        for p in ProfileStore::builtin().unwrap().iter() {
            let (v_lo, v_hi) = (p.curve().volts_min().0, p.curve().volts_max().0);
            for t in [-30.0, -5.0, 10.0, 25.0, 40.0, 50.0] {
                for i in 0..=200 {
                    let v = v_lo - 0.05 + (v_hi - v_lo + 0.1) * i as f64 / 200.0;
                    let r = p.refer_to_25c(Volts(v), Celsius(t));
                    let s = r.lookup.soc;
                    let k = p.ocv_coefficient(s).0;
                    assert!((r.ocv25.0 - (v - k * (t - 25.0) / 1000.0)).abs() < 1e-12);
                    match r.lookup.beyond {
                        None => {
                            let back = p.ocv_per_cell_at(s, Celsius(t)).0;
                            assert!((back - v).abs() < 1e-9, "{} {t} °C {v} V: {back}", p.id());
                        }
                        // Beyond an end: clamped, and the referred voltage lies beyond it.
                        Some((curve::CurveEnd::BelowEmpty, by)) => {
                            assert_eq!(s, p.curve().soc_min());
                            assert!((r.ocv25.0 + by.0 - v_lo).abs() < 1e-12);
                        }
                        Some((curve::CurveEnd::AboveFull, by)) => {
                            assert_eq!(s, p.curve().soc_max());
                            assert!((r.ocv25.0 - by.0 - v_hi).abs() < 1e-12);
                        }
                    }
                }
            }
        }
    }

    #[test]
    fn the_referral_ends_within_its_tolerance_of_a_bisection() {
        // Derived: bisection of the forward model itself (the `splines`
        // curve plus the coefficient, `ocv_per_cell_at`) over the field
        // range −40…75 °C. The solver stops on a bound of Newton's error, so
        // it must lie within 1e-10 % of charge, plus what the voltage's
        // rounding (8 ulp) moves the reference by.
        for p in ProfileStore::builtin().unwrap().iter() {
            let c = p.curve();
            let (s_lo, s_hi) = (c.soc_min().0, c.soc_max().0);
            let (_, slope) = c.curvature_and_slope_bounds();
            for t in (-40..=75).step_by(5).map(f64::from) {
                let floor =
                    slope - p.coefficient_slope_max_mv_per_k_per_pct * (t - 25.0).abs() / 1000.0;
                let rounding = 8.0 * f64::EPSILON * c.volts_max().0 / floor;
                for i in 1..2_000 {
                    let soc = s_lo + (s_hi - s_lo) * i as f64 / 2_000.0;
                    let v = p.ocv_per_cell_at(SocPercent(soc), Celsius(t)).0 + 1e-5;
                    let r = p.refer_to_25c(Volts(v), Celsius(t));
                    if r.lookup.beyond.is_some() {
                        continue;
                    }
                    let want = curve::tests::bisect_to_the_last_bit(
                        |s| p.ocv_per_cell_at(SocPercent(s), Celsius(t)).0 - v,
                        (s_lo, s_hi),
                    );
                    let off = (r.lookup.soc.0 - want).abs();
                    assert!(
                        off <= REFERRAL_TOLERANCE_PERCENT + rounding,
                        "{} at {t} °C, {v} V: {} % against {want} % ({off:e} off)",
                        p.id(),
                        r.lookup.soc.0
                    );
                }
            }
        }
    }

    #[test]
    fn the_ends_of_the_referral_equation_are_the_curves_end_points() {
        // Derived: the segment Bézier is its end points at nt = 0 and 1, so the
        // referral may take the end points for its evaluation there, bit for bit.
        for p in ProfileStore::builtin().unwrap().iter() {
            let c = p.curve();
            for (s, v) in [(c.soc_min(), c.volts_min()), (c.soc_max(), c.volts_max())] {
                let at = c.volts_and_slope(s).0;
                assert_eq!(at.to_bits(), v.0.to_bits(), "{}", p.id());
            }
        }
    }

    #[test]
    fn the_tabulated_coefficient_stays_on_the_electrolyte_model() {
        // Reference: the model itself (Bode dE/dT at the Laliberté molality of
        // the SG at that charge), evaluated directly between the table's nodes.
        for p in ProfileStore::builtin().unwrap().iter() {
            for i in 0..=10_000 {
                let soc = SocPercent(i as f64 / 100.0);
                let d = (p.ocv_coefficient(soc).0 - p.ocv_coefficient_from_model(soc).0).abs();
                // The model is piecewise linear in molality, so the table's error
                // peaks at the model's own kinks; 1e-4 mV/K is 500 times under
                // the ±0.05 mV/K of the dE/dT table it comes from (REFERENCES §1.3).
                assert!(d < 1e-4, "{} at {} %: {d} mV/K off", p.id(), soc.0);
            }
        }
    }

    #[test]
    fn every_shipped_profile_loads_and_is_monotone_cold_and_hot() {
        let store = ProfileStore::builtin().unwrap();
        let ids: Vec<&str> = store.iter().map(|p| p.id()).collect();
        for want in [
            "flooded-automotive",
            "flooded-deep-cycle",
            "flooded-stationary",
            "flooded-tropical",
            "efb",
            "agm",
            "gel",
        ] {
            assert!(ids.contains(&want), "missing {want}");
        }
        for p in store.iter() {
            for t in [25.0, -20.0, 45.0] {
                let mut prev = f64::NEG_INFINITY;
                for i in 0..=1000 {
                    let v = p.ocv_per_cell_at(SocPercent(i as f64 / 10.0), Celsius(t)).0;
                    assert!(v > prev, "{} not increasing at {t} °C, {i}‰", p.id());
                    prev = v;
                }
            }
        }
    }

    #[test]
    fn derived_automotive_curve_reproduces_the_trade_table() {
        // Common practice: the widely published 12 V flooded table at 25 °C
        // (REFERENCES §1.5): 100/75/50/25/0 % → 12.65/12.45/12.24/12.06/11.89 V, ±0.03 V.
        let p = automotive();
        for (soc, volts) in [
            (100.0, 12.65),
            (75.0, 12.45),
            (50.0, 12.24),
            (25.0, 12.06),
            (0.0, 11.89),
        ] {
            let v = p.curve().volts_at(SocPercent(soc)).0 * 6.0;
            assert!((v - volts).abs() <= 0.03, "{soc} %: {v:.3} V vs {volts} V");
            // And the inverse: the table voltage reads back within 3 % SOC.
            let back = p.soc_from_ocv25(Volts(volts / 6.0)).soc.0;
            assert!((back - soc).abs() <= 4.0, "{volts} V → {back:.1} %");
        }
    }

    #[test]
    fn derived_curve_agrees_with_the_sg_plus_084_rule() {
        // Common practice (REFERENCES §1.5; US DOE Fundamentals Handbook uses +0.845,
        // from memory): OCV per cell ≈ SG + 0.84 V within 0.025 V over SG 1.10–1.30.
        for sg in [1.10, 1.15, 1.20, 1.25, 1.30] {
            let v = electrolyte::cell_ocv_25c_from_sg25(SpecificGravity(sg))
                .unwrap()
                .0;
            assert!((v - (sg + 0.84)).abs() <= 0.025, "SG {sg}: {v:.4} V");
        }
    }

    #[test]
    fn temperature_coefficient_is_the_open_circuit_one() {
        // Derived (REFERENCES §1.3): about +0.22 mV/K per cell at 2–5 mol/kg,
        // never the −3 mV/K charging compensation.
        let p = automotive();
        let c = p.ocv_coefficient(SocPercent(75.0)).0;
        assert!(c > 0.1 && c < 0.35, "{c}");
    }

    #[test]
    fn validation_names_the_key() {
        let text = include_str!("../../profiles/flooded-automotive.toml");
        let inverted = text.replace(
            "discharged_sg = { value = 1.12",
            "discharged_sg = { value = 1.3",
        );
        let err = Profile::from_toml(&inverted, "x.toml")
            .unwrap_err()
            .to_string();
        assert!(
            err.contains("x.toml") && err.contains("electrolyte") && err.contains("inverted"),
            "{err}"
        );

        let unknown = text.replace("[tolerance]", "[tolerance]\nwobble = 3");
        let err = Profile::from_toml(&unknown, "y.toml")
            .unwrap_err()
            .to_string();
        assert!(
            err.starts_with("y.toml:") && err.contains("wobble"),
            "{err}"
        );

        let nonfinite = text.replace(
            "curve_mv_per_cell = { value = 10.0",
            "curve_mv_per_cell = { value = nan",
        );
        let err = Profile::from_toml(&nonfinite, "z.toml")
            .unwrap_err()
            .to_string();
        assert!(err.contains("tolerance.curve_mv_per_cell"), "{err}");

        let charging = include_str!("../../profiles/agm.toml").replace(
            "ocv_mv_per_k_per_cell = { value = 0.2",
            "ocv_mv_per_k_per_cell = { value = -3.0",
        );
        let err = Profile::from_toml(&charging, "c.toml")
            .unwrap_err()
            .to_string();
        assert!(err.contains("charging compensation"), "{err}");

        // The float compensation lowers the float voltage as it warms
        // (−3 mV/K per cell, common practice): 0 and positive are refused.
        for bad in ["0.0", "2.0"] {
            let text = include_str!("../../profiles/agm.toml").replace(
                "compensation_mv_per_k_per_cell = { value = -3.0",
                &format!("compensation_mv_per_k_per_cell = {{ value = {bad}"),
            );
            let err = Profile::from_toml(&text, "f.toml").unwrap_err().to_string();
            assert!(
                err.contains("f.toml")
                    && err.contains("float.compensation_mv_per_k_per_cell")
                    && err.contains("must be negative"),
                "{err}"
            );
        }

        let few = include_str!("../../profiles/agm.toml").replace(
            "points = [[0.0, 1.975], [25.0, 2.025], [50.0, 2.070], [75.0, 2.110], [100.0, 2.140]]",
            "points = [[0.0, 1.975]]",
        );
        let err = Profile::from_toml(&few, "p.toml").unwrap_err().to_string();
        assert!(err.contains("at least two"), "{err}");
    }

    #[test]
    fn unknown_ids_get_a_suggestion() {
        let store = ProfileStore::builtin().unwrap();
        let err = store.get("flooded-automotve").unwrap_err().to_string();
        assert!(err.contains("did you mean 'flooded-automotive'"), "{err}");
        let err = store.get("zzzz").unwrap_err().to_string();
        assert!(!err.contains("did you mean"), "{err}");
    }

    #[test]
    fn user_profiles_override_builtins_and_say_so() {
        let dir = tempfile::tempdir().unwrap();
        let text =
            include_str!("../../profiles/agm.toml").replace("name = \"AGM", "name = \"Our AGM");
        std::fs::write(dir.path().join("agm.toml"), text).unwrap();
        let store = ProfileStore::with_user_dir(Some(dir.path())).unwrap();
        assert!(store.get("agm").unwrap().spec.name.starts_with("Our AGM"));
        assert_eq!(store.notices().len(), 1);
        assert!(store.notices()[0].contains("overrides"));
    }

    #[test]
    fn unreadable_files_say_where_and_what_was_expected() {
        let e = Profile::from_toml(" \n\n", "e.toml")
            .unwrap_err()
            .to_string();
        assert!(e.starts_with("e.toml:1: the file is empty"), "{e}");
        let dir = tempfile::tempdir().unwrap();
        let agm = include_str!("../../profiles/agm.toml");
        // 0xE9 is é in Latin-1 (ISO/IEC 8859-1), invalid alone in UTF-8.
        let mut latin1 = agm
            .replacen("name = \"", "name = \"Caf\u{e9} ", 1)
            .into_bytes();
        let at = latin1.windows(2).position(|w| w == "é".as_bytes()).unwrap();
        latin1.splice(at..at + 2, [0xE9]);
        let path = dir.path().join("l1.toml");
        std::fs::write(&path, latin1).unwrap();
        let e = store::load_file(&path).unwrap_err().to_string();
        assert!(e.contains("l1.toml:2: ") && e.contains("0xE9"), "{e}");
        let long_id = agm.replacen(
            "id = \"agm\"",
            &format!("id = \"{}\"", "a".repeat(1 << 20)),
            1,
        );
        let e = Profile::from_toml(&long_id, "long.toml")
            .unwrap_err()
            .to_string();
        assert!(e.contains("1–64") && e.len() < 300, "{e}");
        // A syntax error after multi-byte characters still finds its line.
        let bad = format!("{agm}\n# ééé\nname = \"twice\"\n");
        let e = Profile::from_toml(&bad, "dup.toml")
            .unwrap_err()
            .to_string();
        let line = bad.lines().count();
        assert!(e.starts_with(&format!("dup.toml:{line}:")), "{e}");
    }
}
