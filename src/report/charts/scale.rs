//! Linear scales and "nice" ticks (steps of 1, 2 or 5 times a power of ten).

use super::Axis;

/// Values beyond this magnitude are treated as the edge of the world: it keeps
/// spans finite so that a stray 1e308 cannot turn every coordinate into NaN.
const LIMIT: f64 = 1e15;

/// How close (as a fraction of the axis span) a data value may come to a free
/// end of a nice axis before that end moves out by one step; 4 % of a plot
/// about 200 px tall is 8 px, more than the largest marker's half-size.
const EDGE_ROOM: f64 = 0.04;

/// Maps a domain `[d0, d1]` linearly onto a pixel range `[r0, r1]` (r0 may be
/// greater than r1, as for a y axis that grows upwards).
#[derive(Clone, Copy, Debug)]
pub(crate) struct Scale {
    pub d0: f64,
    pub d1: f64,
    pub r0: f64,
    pub r1: f64,
}

impl Scale {
    /// The pixel position of `v`; far-out values are held a little beyond the
    /// range so that clipping hides them without huge numbers in the markup.
    pub fn map(&self, v: f64) -> f64 {
        let span = self.d1 - self.d0;
        let t = if span.abs() > 0.0 && span.is_finite() {
            (v - self.d0) / span
        } else {
            0.5
        };
        let t = if t.is_finite() {
            t.clamp(-1.0, 2.0)
        } else {
            0.5
        };
        self.r0 + t * (self.r1 - self.r0)
    }
}

/// A resolved axis: its domain, tick values and how many decimals a tick label needs.
#[derive(Clone, Debug)]
pub(crate) struct Domain {
    pub lo: f64,
    pub hi: f64,
    pub ticks: Vec<f64>,
    pub decimals: usize,
}

/// The 1-2-5 step nearest to `raw` (rounding in log terms, so (11.8, 12.9)
/// in five steps gives 0.2, not 0.5).
pub(crate) fn nice_step(raw: f64) -> f64 {
    if !(raw.is_finite() && raw > 0.0) {
        return 1.0;
    }
    let mag = 10f64.powf(raw.log10().floor());
    let norm = raw / mag;
    let m = if norm < 1.5 {
        1.0
    } else if norm < 3.0 {
        2.0
    } else if norm < 7.0 {
        5.0
    } else {
        10.0
    };
    m * mag
}

/// Decimals needed to tell ticks `step` apart (0.2 → 1, 0.05 → 2, 20 → 0).
pub(crate) fn decimals_for(step: f64) -> usize {
    let d = -(step.log10() + 1e-9).floor();
    if d.is_finite() && d > 0.0 {
        (d as usize).min(10)
    } else {
        0
    }
}

/// Multiples of `step` within `[lo, hi]`, computed as k·step (not by repeated
/// addition) so that rounding error does not accumulate.
pub(crate) fn ticks_between(lo: f64, hi: f64, step: f64) -> Vec<f64> {
    let k0 = (lo / step - 1e-9).ceil();
    let k1 = (hi / step + 1e-9).floor();
    if !(k0.is_finite() && k1.is_finite()) || k1 - k0 > 100.0 {
        return vec![lo, hi];
    }
    let mut out = Vec::new();
    let mut k = k0;
    while k <= k1 {
        out.push(k * step);
        k += 1.0;
    }
    out
}

/// The domain for `axis` given the finite data values: the axis's own min/max
/// win; otherwise the data range, widened to whole ticks when `nice` is set,
/// and with `room` by one step more where a data value would sit on the end
/// (for axes whose data are markers; a curve may well end on the frame).
/// Equal ends are padded (5 % of the value, or 1 around zero) so that a single
/// point sits mid-axis instead of dividing by zero.
pub(crate) fn resolve(
    axis: &Axis,
    data: &[f64],
    include_zero: bool,
    nice: bool,
    room: bool,
    target: usize,
) -> Domain {
    let fixed_min = axis
        .min
        .filter(|v| v.is_finite())
        .map(|v| v.clamp(-LIMIT, LIMIT));
    let fixed_max = axis
        .max
        .filter(|v| v.is_finite())
        .map(|v| v.clamp(-LIMIT, LIMIT));
    let finite = data
        .iter()
        .copied()
        .filter(|v| v.is_finite())
        .map(|v| v.clamp(-LIMIT, LIMIT));
    let zero = include_zero.then_some(0.0);
    let data_range = finite
        .chain(zero)
        .fold(None, |acc: Option<(f64, f64)>, v| match acc {
            None => Some((v, v)),
            Some((a, b)) => Some((a.min(v), b.max(v))),
        });
    let (mut lo, mut hi) = data_range.unwrap_or((0.0, 1.0));
    lo = fixed_min.unwrap_or(lo);
    hi = fixed_max.unwrap_or(hi);
    if lo > hi {
        std::mem::swap(&mut lo, &mut hi);
    }
    if hi - lo <= f64::EPSILON * lo.abs().max(1.0) {
        let pad = if lo == 0.0 { 1.0 } else { lo.abs() * 0.05 };
        match (fixed_min.is_some(), fixed_max.is_some()) {
            (true, false) => hi = lo + 2.0 * pad,
            (false, true) => lo = hi - 2.0 * pad,
            _ if include_zero && lo == 0.0 => hi = lo + 2.0 * pad,
            _ => {
                lo -= pad;
                hi += pad;
            }
        }
    }
    let step = nice_step((hi - lo) / target.max(1) as f64);
    if nice {
        if fixed_min.is_none() {
            lo = (lo / step).floor() * step;
        }
        if fixed_max.is_none() {
            hi = (hi / step).ceil() * step;
        }
        // A data value on (or within a marker of) a free end would be drawn on
        // the plot frame and half cut by the clip: give that end one more step.
        // Zero brought in by `include_zero` is a baseline and stays the end.
        if let Some((d_lo, d_hi)) = data_range.filter(|_| room) {
            let near = EDGE_ROOM * (hi - lo);
            if fixed_min.is_none() && !(include_zero && lo == 0.0) && d_lo - lo < near {
                lo -= step;
            }
            if fixed_max.is_none() && !(include_zero && hi == 0.0) && hi - d_hi < near {
                hi += step;
            }
        }
    }
    Domain {
        lo,
        hi,
        ticks: ticks_between(lo, hi, step),
        decimals: decimals_for(step),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    fn axis(min: Option<f64>, max: Option<f64>) -> Axis {
        Axis {
            label: "v (V)".into(),
            min,
            max,
        }
    }

    #[test]
    fn scale_maps_domain_ends_to_pixel_ends() {
        // Definition of a linear map (derived): d0 → r0, d1 → r1, midpoint → midpoint.
        let s = Scale {
            d0: 11.8,
            d1: 12.9,
            r0: 300.0,
            r1: 20.0,
        };
        assert_relative_eq!(s.map(11.8), 300.0);
        assert_relative_eq!(s.map(12.9), 20.0);
        assert_relative_eq!(s.map(12.35), 160.0, epsilon = 1e-9);
    }

    #[test]
    fn scale_survives_degenerate_domain() {
        let s = Scale {
            d0: 5.0,
            d1: 5.0,
            r0: 0.0,
            r1: 100.0,
        };
        assert_relative_eq!(s.map(5.0), 50.0);
        assert_relative_eq!(s.map(f64::NAN), 50.0);
    }

    fn ticks(lo: f64, hi: f64, target: usize) -> Vec<f64> {
        resolve(&axis(Some(lo), Some(hi)), &[], false, true, false, target).ticks
    }

    #[test]
    fn nice_ticks_for_percent_range() {
        // 1-2-5 tick steps (common practice): 0–100 in about five steps is 0, 20, …, 100.
        assert_eq!(
            ticks(0.0, 100.0, 5),
            vec![0.0, 20.0, 40.0, 60.0, 80.0, 100.0]
        );
        // …and in about ten steps is 0, 10, …, 100.
        assert_eq!(ticks(0.0, 100.0, 10).len(), 11);
    }

    #[test]
    fn nice_ticks_for_block_voltage_range() {
        // 1-2-5 tick steps (common practice): 11.8–12.9 V in about five steps → 0.2 V apart.
        let t = ticks(11.8, 12.9, 5);
        let expected = [11.8, 12.0, 12.2, 12.4, 12.6, 12.8];
        assert_eq!(t.len(), expected.len());
        for (a, b) in t.iter().zip(expected) {
            assert_relative_eq!(*a, b, epsilon = 1e-9);
        }
        assert_eq!(decimals_for(0.2), 1);
    }

    #[test]
    fn decimals_follow_the_step() {
        assert_eq!(decimals_for(20.0), 0);
        assert_eq!(decimals_for(1.0), 0);
        assert_eq!(decimals_for(0.05), 2);
    }

    #[test]
    fn resolve_pads_equal_ends() {
        let d = resolve(&axis(None, None), &[12.6, 12.6], false, false, false, 5);
        assert!(d.lo < 12.6 && d.hi > 12.6);
        let d = resolve(&axis(None, None), &[0.0], true, true, false, 5);
        assert_eq!((d.lo, d.hi), (0.0, 2.0));
    }

    #[test]
    fn resolve_widens_to_whole_ticks_but_honours_fixed_ends() {
        let d = resolve(&axis(None, None), &[11.83, 12.87], false, true, false, 5);
        assert_relative_eq!(d.lo, 11.8, epsilon = 1e-9);
        assert_relative_eq!(d.hi, 13.0, epsilon = 1e-9);
        // With room, 11.83 (2.5 % of the span above the 11.8 tick, inside
        // EDGE_ROOM) would touch the frame, so that end moves one step down.
        let d = resolve(&axis(None, None), &[11.83, 12.87], false, true, true, 5);
        assert_relative_eq!(d.lo, 11.6, epsilon = 1e-9);
        let d = resolve(
            &axis(Some(0.0), Some(100.0)),
            &[37.0, 55.0],
            false,
            true,
            false,
            5,
        );
        assert_eq!((d.lo, d.hi), (0.0, 100.0));
    }

    #[test]
    fn resolve_keeps_data_off_free_ends() {
        // A string whose low cell (2.071 V) rounds down to the 2.07 tick: the
        // marker would sit on the frame, so the end moves to 2.06.
        let d = resolve(&axis(None, None), &[2.071, 2.136], false, true, true, 5);
        assert_relative_eq!(d.lo, 2.06, epsilon = 1e-9);
        assert_relative_eq!(d.hi, 2.14, epsilon = 1e-9);
        // A value exactly on a tick gets room too…
        let d = resolve(&axis(None, None), &[2.1351, 2.1364], false, true, true, 5);
        assert!(d.hi > 2.1364 + 0.03 * (d.hi - d.lo), "{d:?}");
        // …but a bar chart's zero baseline and fixed ends stay where they are.
        let d = resolve(&axis(Some(0.0), None), &[0.0, 11.0], true, true, true, 5);
        assert_eq!((d.lo, d.hi), (0.0, 12.0));
        let d = resolve(
            &axis(Some(0.0), Some(100.0)),
            &[0.0, 100.0],
            false,
            true,
            true,
            5,
        );
        assert_eq!((d.lo, d.hi), (0.0, 100.0));
    }

    #[test]
    fn resolve_ignores_non_finite_and_swapped_limits() {
        let d = resolve(
            &axis(Some(10.0), Some(0.0)),
            &[f64::NAN, f64::INFINITY],
            false,
            true,
            false,
            5,
        );
        assert_eq!((d.lo, d.hi), (0.0, 10.0));
        let d = resolve(
            &axis(None, None),
            &[f64::MAX, -f64::MAX],
            false,
            true,
            false,
            5,
        );
        assert!(d.lo.is_finite() && d.hi.is_finite() && d.ticks.len() >= 2);
    }
}
