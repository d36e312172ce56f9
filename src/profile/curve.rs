//! A monotone rest-voltage curve: state of charge ↔ open-circuit voltage per cell at 25 °C.
//!
//! The curve is a piecewise cubic Hermite interpolant with Fritsch–Carlson
//! monotone tangents (F. N. Fritsch and R. E. Carlson, "Monotone piecewise cubic
//! interpolation", SIAM J. Numer. Anal. 17(2), 1980). Each Hermite segment is
//! written as a cubic Bézier segment for the `splines` crate (control points at
//! p ± m·h/3), so evaluation is the crate's. Because the interpolant is
//! strictly increasing, the inverse (voltage → state of charge) is unique. It
//! is found in the one segment that brackets the voltage, by Newton steps kept
//! inside a shrinking bracket, on a copy of the segment's Bézier that repeats
//! the crate's formula operation for operation (a test holds the two equal to
//! the last bit): the inverse runs for every reading of a fleet, and bisection
//! through the crate's key lookup was the analysis's hot spot. From a table's
//! first guess one Newton step mostly suffices, and a bound on its error (the
//! segment's curvature over its least slope) says when it does, so that no
//! second evaluation is spent to confirm it (tested against bisection).

use crate::units::{SocPercent, Volts};
use splines::{Interpolation, Key, Spline};

/// Which end of the curve a reading fell beyond.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum CurveEnd {
    /// Below the 0 % point.
    BelowEmpty,
    /// Above the 100 % point.
    AboveFull,
}

/// Result of looking a voltage up on the curve.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize)]
pub struct SocLookup {
    /// State of charge, clamped to the curve's ends.
    pub soc: SocPercent,
    /// Set when the voltage lay beyond an end of the curve: which end, and by how much per cell.
    pub beyond: Option<(CurveEnd, Volts)>,
}

/// A strictly increasing curve of OCV per cell at 25 °C against state of charge.
#[derive(Clone, Debug)]
pub struct MonotoneCurve {
    soc_percent: Vec<f64>,
    volts_per_cell: Vec<f64>,
    /// Bézier control values per segment: start, its out-control, the end's in-control, end.
    segments: Vec<[f64; 4]>,
    /// The same curve as a `splines` spline: the reference the fast path is tested against.
    spline: Spline<f64, f64>,
    /// State of charge at [`INVERSE_TABLE_POINTS`] voltages evenly spaced
    /// over the curve: Newton's first guess, so that one step mostly does.
    inverse_table: Vec<f64>,
    /// The segment holding each of the table's voltages.
    inverse_segments: Vec<usize>,
    /// Table intervals per volt.
    inverse_scale: f64,
    /// Segment lookup on the state-of-charge axis.
    soc_index: SegmentIndex,
    /// Segment lookup on the voltage axis.
    volts_index: SegmentIndex,
    /// Per segment, the [`newton_error_factor`] of its Bézier in `nt`.
    newton_error_nt: Vec<f64>,
    /// Per segment, 1 / its width in % of charge, for first guesses in `nt`.
    inverse_widths: Vec<f64>,
    /// The greatest |d²V/dSOC²| over the curve, V per cell per %².
    max_curvature_v_per_pct2: f64,
    /// The least dV/dSOC over the curve, V per cell per %.
    min_slope_v_per_pct: f64,
}

/// How close to its root the inverse's Newton solve ends, in `nt` (a
/// fraction of the segment: 5e-11 % of charge on a 5 % segment).
const INVERSE_TOLERANCE_NT: f64 = 1e-12;

/// Points of [`MonotoneCurve`]'s inverse table.
const INVERSE_TABLE_POINTS: usize = 512;

/// The `splines` crate's cubic Bézier, in its order of operations.
fn bezier(nt: f64, [a, u, v, b]: [f64; 4]) -> f64 {
    let one_t = 1. - nt;
    let one_t2 = one_t * one_t;
    let one_t3 = one_t2 * one_t;
    let t2 = nt * nt;
    a * one_t3 + (u * one_t2 * nt + v * one_t * t2) * 3. + b * t2 * nt
}

/// Its derivative with respect to `nt`.
fn bezier_slope(nt: f64, [a, u, v, b]: [f64; 4]) -> f64 {
    let one_t = 1. - nt;
    3. * ((u - a) * one_t * one_t + 2. * (v - u) * one_t * nt + (b - v) * nt * nt)
}

/// Its second derivative's greatest magnitude on `[0, 1]`: the second
/// derivative is linear in `nt`, so it is the larger of its ends.
fn bezier_curvature_max([a, u, v, b]: [f64; 4]) -> f64 {
    6. * (v - 2. * u + a).abs().max((b - 2. * v + u).abs())
}

/// Its derivative's least value on `[0, 1]`: a quadratic in `nt`, least at
/// an end or at its vertex.
fn bezier_slope_min(seg: [f64; 4]) -> f64 {
    let [a, u, v, b] = seg;
    let (p, q, r) = (u - a, v - u, b - v);
    let ends = bezier_slope(0., seg).min(bezier_slope(1., seg));
    let convexity = p - 2. * q + r;
    let vertex = (p - q) / convexity;
    if convexity > 0. && vertex > 0. && vertex < 1. {
        ends.min(bezier_slope(vertex, seg))
    } else {
        ends
    }
}

/// Margin on the Newton error factors below, for the rounding in computing
/// them: the bound they give is used to stop, never to report.
const ERROR_FACTOR_MARGIN: f64 = 2.0;

/// A Newton step's error factor for a function with second derivative at
/// most `curvature` and slope at least `slope_floor`: after a step of length
/// `d` over which the function is twice differentiable, its result lies
/// within `factor · d²` of the root. (Taylor: the step's end misses zero by
/// at most `curvature · d² / 2`, and the function rises at least
/// `slope_floor` per unit from there to the root.) Infinite when the slope
/// has no positive floor, so that the bound never stops a solve.
pub(crate) fn newton_error_factor(curvature: f64, slope_floor: f64) -> f64 {
    if slope_floor > 0.0 {
        ERROR_FACTOR_MARGIN * curvature / (2.0 * slope_floor)
    } else {
        f64::INFINITY
    }
}

/// The root of an increasing `f` (given as value and slope) in the bracket
/// `(lo, hi)`, whose ends straddle it: Newton steps from `start`, replaced by
/// bisection whenever one would leave the shrinking bracket, until a step or
/// the bracket is below `tolerance`, or `close(x, next)` says that the
/// Newton step from `x` to `next` provably ended within `tolerance` of the
/// root (see [`newton_error_factor`]). That last test is what lets a good
/// first guess finish in one evaluation: the step-length test alone needs a
/// second evaluation only to see the step that confirms the first. Shared by
/// the curve's inverse and the temperature referral, which solve the same way.
pub(crate) fn bracketed_newton(
    f: impl Fn(f64) -> (f64, f64),
    (mut lo, mut hi): (f64, f64),
    start: f64,
    tolerance: f64,
    close: impl Fn(f64, f64) -> bool,
) -> f64 {
    // The first step before the bracket's bookkeeping, since from a good
    // guess it mostly ends the solve. Whether it is a Newton step is the same
    // test on the bracket as given as on the one it shrinks to (a Newton step
    // moves away from the end that moves to `start`), so this is the loop's
    // first pass, reordered.
    let (value, slope) = f(start);
    if value == 0.0 {
        return start;
    }
    let newton = start - value / slope;
    let is_newton = slope > 0.0 && (lo..=hi).contains(&newton);
    if is_newton && close(start, newton) {
        return newton;
    }
    if value < 0.0 {
        lo = start;
    } else {
        hi = start;
    }
    let mut x = if is_newton { newton } else { 0.5 * (lo + hi) };
    if (x - start).abs() <= tolerance || hi - lo <= tolerance {
        return x;
    }
    for _ in 1..100 {
        let (value, slope) = f(x);
        if value == 0.0 {
            break;
        }
        if value < 0.0 {
            lo = x;
        } else {
            hi = x;
        }
        let newton = x - value / slope;
        let is_newton = slope > 0.0 && (lo..=hi).contains(&newton);
        let next = if is_newton { newton } else { 0.5 * (lo + hi) };
        let done =
            (next - x).abs() <= tolerance || hi - lo <= tolerance || (is_newton && close(x, next));
        x = next;
        if done {
            break;
        }
    }
    x
}

/// The index `i` of the segment `[xs[i], xs[i+1]]` holding `x` (clamped to the ends).
fn segment_of(xs: &[f64], x: f64) -> usize {
    let last = xs.len().saturating_sub(2);
    xs.partition_point(|&k| k <= x).saturating_sub(1).min(last)
}

/// Buckets per segment of a [`SegmentIndex`]: enough that a bucket seldom
/// spans a knot even where the knots are uneven (the voltage axis).
const BUCKETS_PER_SEGMENT: usize = 4;

/// [`segment_of`] in constant time, for the solvers that call it for every
/// reading: the axis is cut into equal buckets, each remembering the segment
/// at its start, and the answer is walked to from there. The walk makes the
/// result exactly [`segment_of`]'s whatever the rounding of the bucket
/// (tested), so the table only saves the binary search.
#[derive(Clone, Debug)]
struct SegmentIndex {
    origin: f64,
    buckets_per_unit: f64,
    first: Vec<usize>,
}

impl SegmentIndex {
    /// The index of strictly increasing knots `xs` (at least two).
    fn new(xs: &[f64]) -> SegmentIndex {
        let buckets = BUCKETS_PER_SEGMENT * (xs.len() - 1);
        let (origin, span) = (xs[0], xs[xs.len() - 1] - xs[0]);
        let first = (0..buckets)
            .map(|b| segment_of(xs, origin + span * b as f64 / buckets as f64))
            .collect();
        SegmentIndex {
            origin,
            buckets_per_unit: buckets as f64 / span,
            first,
        }
    }

    /// The segment of `xs` (the knots it was made from) holding `x`, as [`segment_of`].
    fn find(&self, xs: &[f64], x: f64) -> usize {
        // Below the origin or NaN the cast gives 0; above the end, the last
        // bucket. (Through i64: its saturating cast is cheaper than usize's.)
        let bucket = (((x - self.origin) * self.buckets_per_unit).max(0.0) as i64 as usize)
            .min(self.first.len() - 1);
        walk_to_segment(xs, x, self.first[bucket])
    }
}

/// [`segment_of`] by walking from segment `start`: it stops only at the one
/// segment with `xs[i] <= x < xs[i + 1]` (or at an end), so it gives the
/// binary search's answer from any start; from a near one, in a step or two.
fn walk_to_segment(xs: &[f64], x: f64, start: usize) -> usize {
    let last = xs.len() - 2;
    let mut i = start.min(last);
    while i < last && xs[i + 1] <= x {
        i += 1;
    }
    while i > 0 && xs[i] > x {
        i -= 1;
    }
    i
}

/// A first guess at the inverse, from [`MonotoneCurve`]'s table.
#[derive(Clone, Copy, Debug)]
pub(crate) struct Guess {
    /// State of charge, %.
    pub soc: f64,
    /// A segment at or next to the one holding it (a hint for
    /// [`MonotoneCurve::segment_near`]).
    pub segment: usize,
}

/// Why a set of points cannot make a curve.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CurveError {
    /// Fewer than two points.
    #[error("a curve needs at least two points, found {0}")]
    TooFewPoints(usize),
    /// A number is NaN or infinite.
    #[error("point {index} is not a finite number")]
    NotFinite {
        /// Index of the point (0-based).
        index: usize,
    },
    /// State of charge outside 0–100.
    #[error("point {index}: state of charge {} is outside 0–100 %", crate::units::Shown(*.soc_percent))]
    SocOutOfRange {
        /// Index of the point.
        index: usize,
        /// The value.
        soc_percent: f64,
    },
    /// Not strictly increasing.
    #[error("point {index}: {axis} must increase strictly from the previous point ({} then {})", crate::units::Shown(*.previous), crate::units::Shown(*.value))]
    NotIncreasing {
        /// Index of the point.
        index: usize,
        /// Which axis.
        axis: &'static str,
        /// Previous value.
        previous: f64,
        /// This value.
        value: f64,
    },
}

impl MonotoneCurve {
    /// Build a curve from `(soc_percent, volts_per_cell)` points, which must be
    /// finite, within 0–100 %, and strictly increasing in both coordinates.
    pub fn new(points: &[(SocPercent, Volts)]) -> Result<MonotoneCurve, CurveError> {
        if points.len() < 2 {
            return Err(CurveError::TooFewPoints(points.len()));
        }
        for (index, (s, v)) in points.iter().enumerate() {
            if !s.is_finite() || !v.is_finite() {
                return Err(CurveError::NotFinite { index });
            }
            if !(0.0..=100.0).contains(&s.0) {
                return Err(CurveError::SocOutOfRange {
                    index,
                    soc_percent: s.0,
                });
            }
            if index > 0 {
                let (ps, pv) = points[index - 1];
                if s.0 <= ps.0 {
                    return Err(CurveError::NotIncreasing {
                        index,
                        axis: "state of charge",
                        previous: ps.0,
                        value: s.0,
                    });
                }
                if v.0 <= pv.0 {
                    return Err(CurveError::NotIncreasing {
                        index,
                        axis: "voltage",
                        previous: pv.0,
                        value: v.0,
                    });
                }
            }
        }
        let xs: Vec<f64> = points.iter().map(|p| p.0 .0).collect();
        let ys: Vec<f64> = points.iter().map(|p| p.1 .0).collect();
        let tangents = fritsch_carlson_tangents(&xs, &ys);
        let n = xs.len();
        let segments: Vec<[f64; 4]> = (0..n - 1)
            .map(|i| {
                let h = xs[i + 1] - xs[i];
                [
                    ys[i],
                    ys[i] + tangents[i] * h / 3.0,
                    ys[i + 1] - tangents[i + 1] * h / 3.0,
                    ys[i + 1],
                ]
            })
            .collect();
        let keys = (0..n)
            .map(|i| {
                let h_in = if i > 0 { xs[i] - xs[i - 1] } else { 0.0 };
                let h_out = if i + 1 < n { xs[i + 1] - xs[i] } else { 0.0 };
                let control_in = ys[i] - tangents[i] * h_in / 3.0;
                let control_out = ys[i] + tangents[i] * h_out / 3.0;
                Key::new(
                    xs[i],
                    ys[i],
                    Interpolation::StrokeBezier(control_in, control_out),
                )
            })
            .collect();
        let widths: Vec<f64> = xs.windows(2).map(|w| w[1] - w[0]).collect();
        let newton_error_nt = segments
            .iter()
            .map(|&seg| newton_error_factor(bezier_curvature_max(seg), bezier_slope_min(seg)))
            .collect();
        let max_curvature_v_per_pct2 = segments
            .iter()
            .zip(&widths)
            .map(|(&seg, h)| bezier_curvature_max(seg) / (h * h))
            .fold(0.0, f64::max);
        let min_slope_v_per_pct = segments
            .iter()
            .zip(&widths)
            .map(|(&seg, h)| bezier_slope_min(seg) / h)
            .fold(f64::INFINITY, f64::min);
        let mut curve = MonotoneCurve {
            newton_error_nt,
            inverse_widths: widths.iter().map(|h| 1.0 / h).collect(),
            max_curvature_v_per_pct2,
            min_slope_v_per_pct,
            soc_index: SegmentIndex::new(&xs),
            volts_index: SegmentIndex::new(&ys),
            soc_percent: xs,
            volts_per_cell: ys,
            segments,
            spline: Spline::from_vec(keys),
            inverse_table: Vec::new(),
            inverse_segments: Vec::new(),
            inverse_scale: 0.0,
        };
        let (v_lo, v_hi) = (curve.volts_min().0, curve.volts_max().0);
        let last = INVERSE_TABLE_POINTS - 1;
        let table_volts = |k: usize| v_lo + (v_hi - v_lo) * k as f64 / last as f64;
        curve.inverse_table = (0..=last)
            .map(|k| match k {
                0 => curve.soc_min().0,
                k if k == last => curve.soc_max().0,
                k => curve.solve(table_volts(k), None),
            })
            .collect();
        curve.inverse_segments = (0..=last)
            .map(|k| segment_of(&curve.volts_per_cell, table_volts(k)))
            .collect();
        curve.inverse_scale = last as f64 / (v_hi - v_lo);
        Ok(curve)
    }

    /// The curve's defining points.
    pub fn points(&self) -> Vec<(SocPercent, Volts)> {
        self.soc_percent
            .iter()
            .zip(&self.volts_per_cell)
            .map(|(s, v)| (SocPercent(*s), Volts(*v)))
            .collect()
    }

    /// Lowest state of charge the curve covers.
    pub fn soc_min(&self) -> SocPercent {
        SocPercent(self.soc_percent[0])
    }

    /// Highest state of charge the curve covers.
    pub fn soc_max(&self) -> SocPercent {
        SocPercent(self.soc_percent[self.soc_percent.len() - 1])
    }

    /// OCV per cell at the lowest point.
    pub fn volts_min(&self) -> Volts {
        Volts(self.volts_per_cell[0])
    }

    /// OCV per cell at the highest point.
    pub fn volts_max(&self) -> Volts {
        Volts(self.volts_per_cell[self.volts_per_cell.len() - 1])
    }

    /// OCV per cell at a state of charge (clamped to the curve's range).
    pub fn volts_at(&self, soc: SocPercent) -> Volts {
        let lo = self.soc_percent[0];
        let hi = self.soc_percent[self.soc_percent.len() - 1];
        let s = if soc.0.is_nan() {
            lo
        } else {
            soc.0.clamp(lo, hi)
        };
        // clamped_sample only fails on an empty spline, which `new` rules out.
        Volts(
            self.spline
                .clamped_sample(s)
                .unwrap_or(self.volts_per_cell[0]),
        )
    }

    #[cfg(test)]
    /// [`MonotoneCurve::volts_at`] by the segment table that the inverse
    /// searches; equal to the `splines` evaluation to the last bit (tested).
    fn volts_by_segments(&self, soc: SocPercent) -> Volts {
        Volts(self.volts_and_slope(soc).0)
    }

    /// Volts per cell and its slope dV/dSOC (V per %) at a state of charge
    /// (clamped to the curve), from the segment table, as the solvers take
    /// it ([`MonotoneCurve::volts_and_slope_on`]): the tests' view of it.
    #[cfg(test)]
    pub(crate) fn volts_and_slope(&self, soc: SocPercent) -> (f64, f64) {
        let s = soc.0.clamp(self.soc_min().0, self.soc_max().0);
        self.volts_and_slope_on(s, self.soc_index.find(&self.soc_percent, s))
    }

    /// [`MonotoneCurve::volts_and_slope`] at a state of charge within the
    /// curve, on segment `i`, the one holding it.
    pub(crate) fn volts_and_slope_on(&self, s: f64, i: usize) -> (f64, f64) {
        let h = self.soc_percent[i + 1] - self.soc_percent[i];
        let nt = (s - self.soc_percent[i]) / h;
        let seg = self.segments[i];
        (bezier(nt, seg), bezier_slope(nt, seg) / h)
    }

    /// The segment holding a state of charge within the curve, as
    /// [`MonotoneCurve::volts_and_slope`] finds it, trying segment `hint`
    /// first: a solver's successive points mostly share one.
    pub(crate) fn segment_near(&self, s: f64, hint: usize) -> usize {
        let xs = &self.soc_percent;
        let last = xs.len() - 2;
        // The conditions that stop the walk, so the segment it would find.
        if hint <= last && xs[hint] <= s && (s < xs[hint + 1] || hint == last) {
            hint
        } else {
            self.soc_index.find(xs, s)
        }
    }

    /// The states of charge at the ends of segment `i`.
    pub(crate) fn segment_span(&self, i: usize) -> (f64, f64) {
        (self.soc_percent[i], self.soc_percent[i + 1])
    }

    /// The greatest |d²V/dSOC²| over the curve (V per cell per %²) and its
    /// least slope dV/dSOC (V per cell per %): bounds for a solver's error.
    pub(crate) fn curvature_and_slope_bounds(&self) -> (f64, f64) {
        (self.max_curvature_v_per_pct2, self.min_slope_v_per_pct)
    }

    /// State of charge for an OCV per cell at 25 °C; beyond the ends it clamps
    /// and says by how much the voltage lay outside.
    pub fn soc_at(&self, volts_per_cell: Volts) -> SocLookup {
        let v = volts_per_cell.0;
        let (v_lo, v_hi) = (self.volts_min().0, self.volts_max().0);
        if v.is_nan() || v <= v_lo {
            return SocLookup {
                soc: self.soc_min(),
                beyond: (v < v_lo).then_some((CurveEnd::BelowEmpty, Volts(v_lo - v))),
            };
        }
        if v >= v_hi {
            return SocLookup {
                soc: self.soc_max(),
                beyond: (v > v_hi).then_some((CurveEnd::AboveFull, Volts(v - v_hi))),
            };
        }
        SocLookup {
            soc: SocPercent(self.solve(v, self.guess(v))),
            beyond: None,
        }
    }

    /// A first guess at the state of charge for `v`, by linear
    /// interpolation in the table made at construction (clamped to its
    /// ends); `None` while the table is being made.
    pub(crate) fn guess(&self, v: f64) -> Option<Guess> {
        let (i, f) = self.table_position(v)?;
        let t = &self.inverse_table;
        let rise = t[i + 1] - t[i];
        Some(Guess {
            soc: t[i] + rise * f,
            segment: self.inverse_segments[i],
        })
    }

    /// Where `v` falls in the inverse table: the interval and the fraction
    /// of the way through it (clamped to the table's ends); `None` while the
    /// table is being made. A profile tabulates on the same grid
    /// ([`MonotoneCurve::table_socs`]) to read its own values there.
    pub(crate) fn table_position(&self, v: f64) -> Option<(usize, f64)> {
        let n = self.inverse_table.len();
        if n < 2 {
            return None;
        }
        let last = (n - 1) as f64;
        // A guess need not be the inverse to the bit, so the scale
        // multiplies where an exact map would divide.
        let x = ((v - self.volts_min().0) * self.inverse_scale).clamp(0.0, last);
        // x ≥ 0, so truncation is the floor, without a call to libm's; i64
        // converts in one instruction where usize takes several.
        let i = (x as i64).min(n as i64 - 2);
        Some((i as usize, x - i as f64))
    }

    /// The states of charge of the inverse table's evenly spaced voltages.
    pub(crate) fn table_socs(&self) -> &[f64] {
        &self.inverse_table
    }

    /// The inverse table's intervals per volt.
    pub(crate) fn table_scale(&self) -> f64 {
        self.inverse_scale
    }

    /// The state of charge whose voltage is `v` (strictly inside the range):
    /// in the one segment that brackets it, safeguarded Newton steps from
    /// `guess` (else from the segment's chord).
    fn solve(&self, v: f64, guess: Option<Guess>) -> f64 {
        let j = match guess {
            Some(g) => walk_to_segment(&self.volts_per_cell, v, g.segment),
            None => self.volts_index.find(&self.volts_per_cell, v),
        };
        let seg = self.segments[j];
        let (x0, x1) = (self.soc_percent[j], self.soc_percent[j + 1]);
        // The segment's Bézier rises with nt, so [0, 1] brackets the root.
        let chord = || (v - seg[0]) / (seg[3] - seg[0]);
        // A guess need not map to nt exactly: multiply, don't divide.
        let start = guess
            .map_or_else(chord, |g| (g.soc - x0) * self.inverse_widths[j])
            .clamp(0.0, 1.0);
        let factor = self.newton_error_nt[j];
        let nt = bracketed_newton(
            |nt| (bezier(nt, seg) - v, bezier_slope(nt, seg)),
            (0.0, 1.0),
            start,
            INVERSE_TOLERANCE_NT,
            // One cubic over the whole bracket, so the bound holds for every step.
            |x, next| factor * (next - x) * (next - x) <= INVERSE_TOLERANCE_NT,
        );
        x0 + nt * (x1 - x0)
    }

    /// Slope dV/dSOC in volts per cell per percent at a state of charge (central difference).
    pub fn slope_volts_per_percent(&self, soc: SocPercent) -> f64 {
        let h = 0.01;
        let a = (soc.0 - h).max(self.soc_min().0);
        let b = (soc.0 + h).min(self.soc_max().0);
        (self.volts_at(SocPercent(b)).0 - self.volts_at(SocPercent(a)).0) / (b - a)
    }
}

/// Fritsch–Carlson monotone tangents for strictly increasing data.
fn fritsch_carlson_tangents(xs: &[f64], ys: &[f64]) -> Vec<f64> {
    let n = xs.len();
    let secants: Vec<f64> = (0..n - 1)
        .map(|i| (ys[i + 1] - ys[i]) / (xs[i + 1] - xs[i]))
        .collect();
    let mut m = vec![0.0; n];
    m[0] = secants[0];
    m[n - 1] = secants[n - 2];
    for i in 1..n - 1 {
        m[i] = if secants[i - 1] * secants[i] <= 0.0 {
            0.0
        } else {
            // Weighted harmonic mean (Fritsch & Butland 1984), which keeps
            // α, β within the monotonicity region without a second pass.
            let h0 = xs[i] - xs[i - 1];
            let h1 = xs[i + 1] - xs[i];
            let w1 = 2.0 * h1 + h0;
            let w2 = h1 + 2.0 * h0;
            (w1 + w2) / (w1 / secants[i - 1] + w2 / secants[i])
        };
    }
    m
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;
    use approx::assert_relative_eq;

    fn pts(p: &[(f64, f64)]) -> Vec<(SocPercent, Volts)> {
        p.iter().map(|(s, v)| (SocPercent(*s), Volts(*v))).collect()
    }

    /// Uneven segments, steep and shallow, like a real rest-voltage curve.
    fn six_point_curve() -> MonotoneCurve {
        MonotoneCurve::new(&pts(&[
            (0.0, 1.95),
            (10.0, 1.97),
            (35.0, 2.02),
            (50.0, 2.04),
            (80.0, 2.09),
            (100.0, 2.12),
        ]))
        .unwrap()
    }

    #[test]
    fn evaluation_is_the_splines_crates_to_the_last_bit() {
        // Reference: the `splines` crate's own sampling of the same keys.
        let c = six_point_curve();
        for i in 0..=10_000 {
            let s = SocPercent(-1.0 + i as f64 * 102.0 / 10_000.0);
            assert_eq!(
                c.volts_by_segments(s).0.to_bits(),
                c.volts_at(s).0.to_bits(),
                "at {} %",
                s.0
            );
        }
    }

    #[test]
    fn the_segment_index_finds_what_the_binary_search_finds() {
        // Reference: the binary search it replaces, at every knot, at the
        // doubles either side of each, across and beyond both axes, and on NaN,
        // for an uneven curve and every bundled one.
        let store = crate::profile::store::ProfileStore::builtin().unwrap();
        let mut curves = vec![six_point_curve()];
        curves.extend(store.iter().map(|p| p.curve().clone()));
        for xs in curves
            .iter()
            .flat_map(|c| [&c.soc_percent, &c.volts_per_cell])
        {
            let index = SegmentIndex::new(xs);
            let (lo, hi) = (xs[0], xs[xs.len() - 1]);
            let mut probes = vec![f64::NAN, f64::NEG_INFINITY, f64::INFINITY];
            for &k in xs.iter() {
                probes.extend([
                    k,
                    // The neighbouring doubles (a zero knot has none of its size).
                    k - (k.abs() * f64::EPSILON).max(f64::MIN_POSITIVE),
                    k + (k.abs() * f64::EPSILON).max(f64::MIN_POSITIVE),
                ]);
            }
            probes.extend(
                (0..=20_000).map(|i| lo - 0.1 * (hi - lo) + 1.2 * (hi - lo) * i as f64 / 20_000.0),
            );
            for x in probes {
                assert_eq!(index.find(xs, x), segment_of(xs, x), "at {x}");
            }
        }
    }

    /// The root of an increasing `f` in `(lo, hi)` by bisection down to
    /// adjacent doubles: slow, and independent of the solvers it checks.
    pub(crate) fn bisect_to_the_last_bit(
        f: impl Fn(f64) -> f64,
        (mut lo, mut hi): (f64, f64),
    ) -> f64 {
        loop {
            let mid = 0.5 * (lo + hi);
            if mid <= lo || mid >= hi {
                return mid;
            }
            if f(mid) < 0.0 {
                lo = mid;
            } else {
                hi = mid;
            }
        }
    }

    #[test]
    fn the_inverse_ends_within_its_tolerance_of_a_bisection() {
        // Derived: bisection of the `splines` crate's own evaluation of the
        // curve. The solver stops on a bound of Newton's error, so its answer
        // must lie within the tolerance (1e-12 of the segment's width), plus
        // what the voltage's rounding (4 ulp) moves the reference by.
        let store = crate::profile::store::ProfileStore::builtin().unwrap();
        let mut curves = vec![six_point_curve()];
        curves.extend(store.iter().map(|p| p.curve().clone()));
        for c in &curves {
            let (lo, hi) = (c.volts_min().0, c.volts_max().0);
            let rounding = 4.0 * f64::EPSILON * hi / c.min_slope_v_per_pct;
            for i in 1..20_000 {
                let v = lo + (hi - lo) * i as f64 / 20_000.0;
                let got = c.soc_at(Volts(v)).soc.0;
                let want = bisect_to_the_last_bit(
                    |s| c.volts_at(SocPercent(s)).0 - v,
                    (c.soc_min().0, c.soc_max().0),
                );
                let j = segment_of(&c.soc_percent, want);
                let width = c.soc_percent[j + 1] - c.soc_percent[j];
                let off = (got - want).abs();
                assert!(
                    off <= INVERSE_TOLERANCE_NT * width + rounding,
                    "{v} V: {got} % against {want} % ({off:e} off)"
                );
            }
        }
    }

    #[test]
    fn inverse_round_trips_on_every_segment() {
        let c = six_point_curve();
        for i in 1..1000 {
            let s = i as f64 / 10.0;
            let v = c.volts_at(SocPercent(s));
            let back = c.soc_at(v).soc.0;
            // The forward map's slope is ≥ 0.6 mV/%, so 1e-9 % is far below a nanovolt.
            assert!((back - s).abs() < 1e-9, "{s} % → {} V → {back} %", v.0);
            assert_eq!(c.soc_at(v).beyond, None);
        }
    }

    #[test]
    fn passes_through_its_points_and_stays_monotone() {
        let c = MonotoneCurve::new(&pts(&[
            (0.0, 1.95),
            (20.0, 2.00),
            (50.0, 2.03),
            (55.0, 2.08),
            (100.0, 2.12),
        ]))
        .unwrap();
        for (s, v) in c.points() {
            assert_relative_eq!(c.volts_at(s).0, v.0, epsilon = 1e-12);
        }
        let mut prev = f64::NEG_INFINITY;
        for i in 0..=10_000 {
            let v = c.volts_at(SocPercent(i as f64 / 100.0)).0;
            assert!(v > prev, "not increasing at {}", i);
            prev = v;
        }
    }

    #[test]
    fn inverse_round_trips_and_clamps() {
        let c = MonotoneCurve::new(&pts(&[(0.0, 1.98), (50.0, 2.04), (100.0, 2.11)])).unwrap();
        for s in [0.5, 10.0, 33.3, 50.0, 75.0, 99.0] {
            let v = c.volts_at(SocPercent(s));
            assert_relative_eq!(c.soc_at(v).soc.0, s, epsilon = 1e-9);
        }
        let above = c.soc_at(Volts(2.15));
        assert_eq!(above.soc.0, 100.0);
        let (end, by) = above.beyond.unwrap();
        assert_eq!(end, CurveEnd::AboveFull);
        assert_relative_eq!(by.0, 0.04, epsilon = 1e-12);
        assert_eq!(c.soc_at(Volts(1.5)).beyond.unwrap().0, CurveEnd::BelowEmpty);
        assert_eq!(c.soc_at(Volts(f64::NAN)).soc.0, 0.0);
    }

    #[test]
    fn refuses_bad_points() {
        assert!(matches!(
            MonotoneCurve::new(&pts(&[(0.0, 2.0)])),
            Err(CurveError::TooFewPoints(1))
        ));
        assert!(matches!(
            MonotoneCurve::new(&pts(&[(0.0, 2.0), (0.0, 2.1)])),
            Err(CurveError::NotIncreasing { .. })
        ));
        assert!(matches!(
            MonotoneCurve::new(&pts(&[(0.0, 2.1), (50.0, 2.0)])),
            Err(CurveError::NotIncreasing { .. })
        ));
        assert!(matches!(
            MonotoneCurve::new(&pts(&[(0.0, 2.0), (120.0, 2.1)])),
            Err(CurveError::SocOutOfRange { .. })
        ));
        assert!(matches!(
            MonotoneCurve::new(&pts(&[(0.0, f64::NAN), (100.0, 2.1)])),
            Err(CurveError::NotFinite { .. })
        ));
    }
}
