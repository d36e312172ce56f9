//! The per-unit mergeable summary.
//!
//! A [`UnitSummary`] holds everything the diagnosis needs about one unit in
//! a size that does not grow with its readings: exact integer sums for the
//! state-of-charge trend and the heat-ageing mean, extremes, the earliest
//! ohmic value (a baseline when none is given), the earliest time, the latest
//! [`HISTORY_CAP`] readings and the full row of the latest one. Merging two summaries of the same unit is
//! associative and commutative — integer sums, min/max, and a
//! "latest K by a total order" set — so files or partitions can be analysed
//! separately, in any order, and combined to the same result as one pass.

use super::ingest::FleetRow;
use crate::correct::After;
use crate::units::{Amperes, Volts};
use chrono::NaiveDateTime;
use std::cmp::Ordering;

/// Readings kept per unit for history rules (post-charge shortfall, days below threshold, duplicates).
pub const HISTORY_CAP: usize = 12;

/// Distinct rated capacities kept per unit: enough to show a disagreement.
pub const CAPACITIES_KEPT: usize = 4;

/// Fixed-point scale for state of charge sums: 0.001 %.
const SOC_SCALE: f64 = 1000.0;
/// Fixed-point scale for the heat-ageing factor sums.
const AGEING_SCALE: f64 = 1_000_000.0;

/// A reading as kept in a unit's history: what the history rules, the
/// charts and the float checks use, and no more (the full row is kept for the
/// latest reading only). A large fleet's memory is mostly these points, so
/// absent values are held as a sentinel (no state of charge) or NaN (no
/// voltage or current; the reader never gives a NaN) rather than in
/// `Option`s, which keeps a point at 48 bytes; the accessors give `Option`s.
#[derive(Clone, Debug, PartialEq)]
pub struct HistoryPoint {
    /// When taken.
    pub taken_at: NaiveDateTime,
    /// What preceded it.
    pub after: After,
    /// Whether the rest was at least the profile's minimum (or the unit idle).
    pub rested: bool,
    /// State of charge, 0.001 % units, or [`NO_SOC`].
    soc_milli_percent: i32,
    /// Its 95 % interval, 0.001 % units ([`NO_SOC`] when there is no state
    /// of charge, or its interval was not worked out).
    soc_interval_milli_percent: [i32; 2],
    /// The unit's voltage as read, or NaN.
    volts: f64,
    /// Float current, for float readings, or NaN.
    float_current_amperes: f64,
}

/// [`HistoryPoint`]'s "no state of charge" (the reading had no usable rest voltage or SG).
const NO_SOC: i32 = i32::MIN;

impl HistoryPoint {
    /// State of charge in percent, where the reading gave one.
    pub fn soc_percent(&self) -> Option<f64> {
        (self.soc_milli_percent != NO_SOC).then(|| self.soc_milli_percent as f64 / SOC_SCALE)
    }

    /// Its 95 % interval in percent, where it was worked out.
    pub fn soc_interval_percent(&self) -> Option<[f64; 2]> {
        let [lo, hi] = self.soc_interval_milli_percent;
        (self.soc_milli_percent != NO_SOC && lo != NO_SOC)
            .then(|| [lo as f64 / SOC_SCALE, hi as f64 / SOC_SCALE])
    }

    /// The unit's voltage as read.
    pub fn volts(&self) -> Option<Volts> {
        (!self.volts.is_nan()).then_some(Volts(self.volts))
    }

    /// Float current as read.
    pub fn float_current(&self) -> Option<Amperes> {
        (!self.float_current_amperes.is_nan()).then_some(Amperes(self.float_current_amperes))
    }

    /// Total order: time, then every other field, so that the same set of
    /// readings is kept and chosen whatever order they arrive in (points
    /// that compare equal are identical).
    fn order(&self, other: &HistoryPoint) -> Ordering {
        self.order_but_interval(other).then_with(|| {
            self.soc_interval_milli_percent
                .cmp(&other.soc_interval_milli_percent)
        })
    }

    /// [`HistoryPoint::order`] but for the interval, which not every
    /// analysis works out: the choice of a unit's latest row, which falls
    /// back on the rows' content (the interval's source), must not depend on it.
    fn order_but_interval(&self, other: &HistoryPoint) -> Ordering {
        self.taken_at
            .cmp(&other.taken_at)
            .then_with(|| self.volts.to_bits().cmp(&other.volts.to_bits()))
            .then_with(|| self.soc_milli_percent.cmp(&other.soc_milli_percent))
            .then_with(|| self.after.cmp(&other.after))
            .then_with(|| self.rested.cmp(&other.rested))
            .then_with(|| {
                self.float_current_amperes
                    .to_bits()
                    .cmp(&other.float_current_amperes.to_bits())
            })
    }
}

/// Total order on the content of two rows (not where they came from), to
/// choose the latest row of a unit whatever order the rows arrive in.
fn row_order(a: &FleetRow, b: &FleetRow) -> Ordering {
    let bits = |v: Option<f64>| v.map(f64::to_bits);
    let sg = |r: &FleetRow| r.sg.iter().map(|s| s.0.to_bits()).collect::<Vec<_>>();
    a.taken_at
        .cmp(&b.taken_at)
        .then_with(|| a.unit_id.cmp(&b.unit_id))
        .then_with(|| a.profile.cmp(&b.profile))
        .then_with(|| bits(a.volts.map(|v| v.0)).cmp(&bits(b.volts.map(|v| v.0))))
        .then_with(|| sg(a).cmp(&sg(b)))
        .then_with(|| a.site.cmp(&b.site))
        .then_with(|| a.string.cmp(&b.string))
        .then_with(|| a.position.cmp(&b.position))
        .then_with(|| a.cells.cmp(&b.cells))
        .then_with(|| bits(a.temperature.map(|t| t.0)).cmp(&bits(b.temperature.map(|t| t.0))))
        .then_with(|| bits(a.rest.map(|h| h.0)).cmp(&bits(b.rest.map(|h| h.0))))
        .then_with(|| a.after.cmp(&b.after))
        .then_with(|| bits(a.ohmic.map(|o| o.0)).cmp(&bits(b.ohmic.map(|o| o.0))))
        .then_with(|| bits(a.baseline_ohmic.map(|o| o.0)).cmp(&bits(b.baseline_ohmic.map(|o| o.0))))
        .then_with(|| a.note.cmp(&b.note))
        .then_with(|| bits(a.float_current.map(|c| c.0)).cmp(&bits(b.float_current.map(|c| c.0))))
        .then_with(|| bits(a.ambient.map(|t| t.0)).cmp(&bits(b.ambient.map(|t| t.0))))
        .then_with(|| bits(a.capacity.map(|c| c.0)).cmp(&bits(b.capacity.map(|c| c.0))))
}

/// Whether reading `a` is later than `b` by the order that chooses a unit's
/// latest row: its point's order (but for the interval), then the rows' content.
fn later(a: (&HistoryPoint, &FleetRow), b: (&HistoryPoint, &FleetRow)) -> bool {
    match a.0.order_but_interval(b.0) {
        Ordering::Greater => true,
        Ordering::Less => false,
        Ordering::Equal => row_order(a.1, b.1) == Ordering::Greater,
    }
}

/// A reading's state of charge, %, and its 95 % interval where it was
/// worked out.
pub type RowSoc = (f64, Option<[f64; 2]>);

/// What folding a row in needs besides the row: its state of charge and the
/// 95 % interval where it gives one, whether it was rested or too briefly
/// rested, and the heat-ageing factor at its temperature.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct RowFacts {
    /// State of charge, %, and its 95 % interval where it was worked out
    /// (only a chart of the history shows it).
    pub soc: Option<RowSoc>,
    /// Rested at least the profile's minimum (or idle).
    pub rested: bool,
    /// Taken with too little rest.
    pub short_rest: bool,
    /// Heat-ageing factor at the reading's temperature.
    pub ageing: Option<f64>,
}

/// Everything kept about one unit.
#[derive(Clone, Debug, Default)]
pub struct UnitSummary {
    /// Readings folded in.
    pub readings: u64,
    /// Rested readings with a state of charge (the trend's n).
    pub trend_n: i64,
    /// Σ t (minutes since 2000-01-01).
    pub trend_sum_t: i128,
    /// Σ t².
    pub trend_sum_tt: i128,
    /// Σ soc (0.001 %).
    pub trend_sum_s: i128,
    /// Σ t·soc.
    pub trend_sum_ts: i128,
    /// Σ soc² (for the trend's standard error).
    pub trend_sum_ss: i128,
    /// Readings with a temperature.
    pub temp_n: i64,
    /// Σ heat-ageing factor (1e-6 units).
    pub ageing_sum: i128,
    /// Coldest temperature seen, in 0.001 °C.
    pub coldest_milli_c: Option<i64>,
    /// Hottest temperature seen, in 0.001 °C.
    pub hottest_milli_c: Option<i64>,
    /// Earliest ohmic reading (time, mΩ bits) — a baseline when none is given.
    pub first_ohmic: Option<(NaiveDateTime, u64)>,
    /// Earliest reading time.
    pub first_at: Option<NaiveDateTime>,
    /// Rated capacities the rows give, Ah: the smallest [`CAPACITIES_KEPT`]
    /// distinct values, ascending (more than one means the rows disagree).
    pub capacities_ah: Vec<f64>,
    /// Readings with too little rest.
    pub short_rest: u64,
    /// The latest readings, oldest first, at most [`HISTORY_CAP`]; readings
    /// taken at the same time are all kept (they are duplicates).
    pub history: Vec<HistoryPoint>,
    /// The full row of the latest reading (the greatest by time, then content).
    pub latest_row: Option<Box<FleetRow>>,
}

/// Both values combined by `pick`, or whichever is there.
pub(crate) fn either<T>(a: Option<T>, b: Option<T>, pick: fn(T, T) -> T) -> Option<T> {
    match (a, b) {
        (Some(a), Some(b)) => Some(pick(a, b)),
        (a, b) => a.or(b),
    }
}

/// Add capacities to a kept set: ascending, distinct, the smallest
/// [`CAPACITIES_KEPT`] (a function of the set, so merging is order-free).
fn add_capacities(kept: &mut Vec<f64>, more: &[f64]) {
    kept.extend_from_slice(more);
    kept.sort_by(f64::total_cmp);
    kept.dedup();
    kept.truncate(CAPACITIES_KEPT);
}

/// Minutes since 2000-01-01 00:00, the trend's time axis: what
/// `(t - epoch).num_minutes()` gives (rounded toward zero; tested), from the
/// time's seconds count, without making the epoch and a duration for every
/// rested reading.
pub fn minutes_since_epoch(t: NaiveDateTime) -> i64 {
    /// 2000-01-01 00:00 in seconds since 1970-01-01 00:00.
    const EPOCH_2000_SECONDS: i64 = 946_684_800;
    let t = t.and_utc();
    let nanos = t.timestamp_subsec_nanos();
    if nanos >= 1_000_000_000 {
        // A leap second: chrono's own arithmetic.
        let epoch = chrono::DateTime::UNIX_EPOCH + chrono::TimeDelta::seconds(EPOCH_2000_SECONDS);
        return (t - epoch).num_minutes();
    }
    let mut seconds = t.timestamp() - EPOCH_2000_SECONDS;
    // Toward zero, as a duration's whole seconds are counted.
    if seconds < 0 && nanos > 0 {
        seconds += 1;
    }
    seconds / 60
}

impl UnitSummary {
    /// Fold one reading in, with what was worked out for it.
    pub fn add(&mut self, mut row: FleetRow, facts: RowFacts) {
        let point = self.count(&row, &facts);
        if self.offer_latest(&point, &mut row) {
            self.latest_row = Some(Box::new(row));
        }
        self.insert_history(point);
    }

    /// [`UnitSummary::add`] of a lent row: if the summary keeps it, the row
    /// is left holding what the summary let go of, for the caller to fill
    /// again. Rows folded one by one from a chunk are not moved out of it on
    /// their way.
    pub(crate) fn add_lent(&mut self, row: &mut FleetRow, facts: RowFacts) {
        let point = self.count(row, &facts);
        self.offer_lent(&point, row);
        self.insert_history(point);
    }

    /// [`UnitSummary::offer_latest`] of a lent row: a unit's first row kept
    /// is a copy (every later one is swapped into the copy's allocations).
    fn offer_lent(&mut self, point: &HistoryPoint, row: &mut FleetRow) {
        if self.offer_latest(point, row) {
            self.latest_row = Some(Box::new(row.clone()));
        }
    }

    /// Fold in `rows`, all of this unit, with their facts (`None` for a row
    /// left out). The same as adding them one by one, but only the latest
    /// of them is offered to the summary (it is swapped in, or copied for a
    /// unit not seen before; the rows are left holding what the summary let
    /// go of, or their own contents), and the history grows once. `points`
    /// is scratch space.
    pub(crate) fn add_run(
        &mut self,
        rows: &mut [FleetRow],
        facts: &[Option<RowFacts>],
        points: &mut Vec<HistoryPoint>,
    ) {
        debug_assert_eq!(rows.len(), facts.len());
        points.clear();
        // The latest of the run by the order `offer_latest` uses: its point
        // (an index into `points`) and its row (an index into `rows`).
        let mut best: Option<(usize, usize)> = None;
        for ((k, row), f) in rows.iter().enumerate().zip(facts) {
            let Some(f) = f else { continue };
            let point = self.count(row, f);
            let newer = match best {
                None => true,
                Some((p, r)) => later((&point, row), (&points[p], &rows[r])),
            };
            points.push(point);
            if newer {
                best = Some((points.len() - 1, k));
            }
        }
        if let Some((p, r)) = best {
            let point = points[p].clone();
            if let Some(row) = rows.get_mut(r) {
                self.offer_lent(&point, row);
            }
        }
        let want = (self.history.len() + points.len()).min(HISTORY_CAP + 1);
        if want > self.history.capacity() {
            self.history.reserve_exact(want - self.history.len());
        }
        // Rows mostly come in time order: then the run's points follow the
        // history, and inserting them one by one (each pushing the oldest
        // out once the history is full) keeps the last HISTORY_CAP of the
        // two end to end; they are put there at once.
        let in_order = |a: &HistoryPoint, b: &HistoryPoint| a.order(b) != Ordering::Greater;
        let follows = self
            .history
            .last()
            .zip(points.first())
            .map_or(true, |(h, p)| in_order(h, p));
        if follows && points.windows(2).all(|w| in_order(&w[0], &w[1])) {
            let new = points.len().min(HISTORY_CAP);
            let old = self.history.len().min(HISTORY_CAP - new);
            self.history.drain(..self.history.len() - old);
            self.history.extend(points.drain(points.len() - new..));
        } else {
            for p in points.drain(..) {
                self.insert_history(p);
            }
        }
    }

    /// Count one reading in (everything but the latest row and the
    /// history), and make its history point.
    fn count(&mut self, row: &FleetRow, facts: &RowFacts) -> HistoryPoint {
        let RowFacts {
            soc,
            rested,
            short_rest,
            ageing,
        } = *facts;
        self.readings += 1;
        if short_rest {
            self.short_rest += 1;
        }
        // 0–100 % in 0.001 % steps fits an i32 with room to spare (and far
        // from NO_SOC); `as` saturates, and the estimate is clamped to 0–100 %.
        let quantise = |x: f64| (x.clamp(0.0, 100.0) * SOC_SCALE).round() as i32;
        let soc_q = soc.map(|(s, _)| quantise(s));
        let interval_q = soc
            .and_then(|(_, i)| i)
            .map(|[lo, hi]| [quantise(lo), quantise(hi)]);
        if let (Some(s), true) = (soc_q, rested) {
            self.add_trend_point(minutes_since_epoch(row.taken_at), s.into());
        }
        if let Some(t) = row.temperature {
            let q = (t.0 * 1000.0).round() as i64;
            self.coldest_milli_c = Some(self.coldest_milli_c.map_or(q, |c| c.min(q)));
            self.hottest_milli_c = Some(self.hottest_milli_c.map_or(q, |c| c.max(q)));
        }
        if let Some(a) = ageing {
            self.temp_n += 1;
            // Through an i64, which `as` saturates at 9.2e12 × (an absurd
            // factor, from a tiny life-halving rule): the sum of as many of
            // them as there are readings stays far inside an i128 (one
            // saturated to i128::MAX overflowed it), and the conversion is a
            // single instruction where one to i128 was a library call.
            self.ageing_sum += i128::from((a * AGEING_SCALE).round() as i64);
        }
        if let Some(o) = row.ohmic {
            let cand = (row.taken_at, o.0.to_bits());
            self.first_ohmic = Some(match self.first_ohmic {
                Some(f) if f <= cand => f,
                _ => cand,
            });
        }
        self.first_at = Some(self.first_at.map_or(row.taken_at, |f| f.min(row.taken_at)));
        if let Some(c) = row.capacity {
            add_capacities(&mut self.capacities_ah, &[c.0]);
        }
        HistoryPoint {
            taken_at: row.taken_at,
            after: row.after,
            rested,
            soc_milli_percent: soc_q.unwrap_or(NO_SOC),
            soc_interval_milli_percent: interval_q.unwrap_or([NO_SOC; 2]),
            volts: row.volts.map_or(f64::NAN, |v| v.0),
            float_current_amperes: row.float_current.map_or(f64::NAN, |a| a.0),
        }
    }

    /// Add one rested reading to the trend's sums: `minutes` since the epoch,
    /// `soc_q` its state of charge in 0.001 % units.
    fn add_trend_point(&mut self, minutes: i64, soc_q: i64) {
        let (t, s) = (i128::from(minutes), i128::from(soc_q));
        self.trend_n += 1;
        self.trend_sum_t += t;
        self.trend_sum_tt += t * t;
        self.trend_sum_s += s;
        self.trend_sum_ts += t * s;
        self.trend_sum_ss += s * s;
    }

    /// Keep `row`'s contents as the latest if it is greater than the row
    /// kept, by its point's order and then by content: swapped in, so that
    /// `row` is left holding what the kept row let go of (not the kept row
    /// as it was: the SG list's values stay), for dropping. `true` when the
    /// unit has no row kept yet: the caller puts `row` in. Call before
    /// inserting the point.
    fn offer_latest(&mut self, point: &HistoryPoint, row: &mut FleetRow) -> bool {
        let newer = match (self.history.last(), &self.latest_row) {
            (Some(last), Some(kept)) => later((point, row), (last, kept)),
            _ => true,
        };
        if newer {
            // Rows mostly arrive in time order, so this runs for nearly every
            // row: reuse the box rather than allocate one each time.
            match &mut self.latest_row {
                Some(kept) => {
                    // The kept row's own allocations (the id, the SG list),
                    // made when the unit was first seen, stay, holding the
                    // new row's contents; the new row's, made just now among
                    // rows that are about to be freed, go. Kept instead, one
                    // live id and list per unit scattered through every
                    // reading thread's pages held those pages: a file sorted
                    // by time peaked higher the more threads read it.
                    // The same name: both rows are this unit's.
                    std::mem::swap(&mut row.unit_id, &mut kept.unit_id);
                    if kept.sg.capacity() >= row.sg.len() {
                        kept.sg.clear();
                        kept.sg.extend_from_slice(&row.sg);
                        std::mem::swap(&mut row.sg, &mut kept.sg);
                    }
                    std::mem::swap(&mut **kept, row);
                }
                None => return true,
            }
        }
        false
    }

    /// Read the parts of the summary that folding a row in will touch, and
    /// give back something made of them (for [`std::hint::black_box`]). A
    /// chunk of a file sorted by time holds rows of as many units as it has
    /// rows, each summary far from the last in memory; reading a shard's
    /// group of them first, with no work between the reads, lets the
    /// processor fetch them side by side rather than one fold at a time
    /// (see DEVELOPERS.md § Fleet scale).
    pub(crate) fn touch(&self) -> u64 {
        let mut acc = self.readings ^ self.short_rest;
        acc ^= (self.trend_sum_tt ^ self.trend_sum_ss ^ self.ageing_sum) as u64;
        acc ^= self.coldest_milli_c.unwrap_or(0) as u64 ^ self.capacities_ah.len() as u64;
        acc ^= self.first_at.map_or(0, |t| t.and_utc().timestamp() as u64);
        if let Some(h) = self.history.last() {
            acc ^= h.soc_milli_percent as u64;
        }
        // A point is 48 bytes: every other one reaches every cache line.
        for h in self.history.iter().step_by(2) {
            acc ^= h.soc_milli_percent as u64;
        }
        if let Some(r) = &self.latest_row {
            acc ^= r.unit_id.len() as u64 ^ r.sg.len() as u64 ^ r.source.line;
            acc ^= r.capacity.map_or(0, |c| c.0.to_bits());
            acc ^= r.sg.first().map_or(0, |g| g.0.to_bits());
            acc ^= r.unit_id.as_bytes().first().map_or(0, |&b| b.into());
        }
        acc
    }

    fn insert_history(&mut self, p: HistoryPoint) {
        let pos = self
            .history
            .partition_point(|h| h.order(&p) != Ordering::Greater);
        if self.history.len() >= HISTORY_CAP && pos == 0 {
            return;
        }
        // Grow by doubling up to the cap and no further: most of a large
        // fleet's memory is these histories.
        if self.history.len() == self.history.capacity() {
            let want = (self.history.capacity() * 2).clamp(2, HISTORY_CAP + 1);
            self.history.reserve_exact(want - self.history.len());
        }
        self.history.insert(pos, p);
        if self.history.len() > HISTORY_CAP {
            self.history.remove(0);
        }
    }

    /// Combine another summary of the same unit into this one.
    pub fn merge(&mut self, other: UnitSummary) {
        self.readings += other.readings;
        self.short_rest += other.short_rest;
        self.trend_n += other.trend_n;
        self.trend_sum_t += other.trend_sum_t;
        self.trend_sum_tt += other.trend_sum_tt;
        self.trend_sum_s += other.trend_sum_s;
        self.trend_sum_ts += other.trend_sum_ts;
        self.trend_sum_ss += other.trend_sum_ss;
        self.temp_n += other.temp_n;
        self.ageing_sum += other.ageing_sum;
        self.coldest_milli_c = either(self.coldest_milli_c, other.coldest_milli_c, Ord::min);
        self.hottest_milli_c = either(self.hottest_milli_c, other.hottest_milli_c, Ord::max);
        self.first_ohmic = either(self.first_ohmic, other.first_ohmic, Ord::min);
        self.first_at = either(self.first_at, other.first_at, Ord::min);
        add_capacities(&mut self.capacities_ah, &other.capacities_ah);
        if let (Some(point), Some(row)) = (other.history.last(), other.latest_row) {
            let point = point.clone();
            let mut row = row;
            if self.offer_latest(&point, &mut row) {
                self.latest_row = Some(row);
            }
        }
        for p in other.history {
            self.insert_history(p);
        }
    }

    /// Least-squares slope of rested state of charge, % per 30 days, when two or more readings span time.
    pub fn trend_percent_per_30_days(&self) -> Option<f64> {
        let n = self.trend_n as i128;
        if n < 2 {
            return None;
        }
        let sxx = n * self.trend_sum_tt - self.trend_sum_t * self.trend_sum_t;
        if sxx == 0 {
            return None;
        }
        let sxy = n * self.trend_sum_ts - self.trend_sum_t * self.trend_sum_s;
        let per_minute = sxy as f64 / sxx as f64 / SOC_SCALE;
        Some(per_minute * 60.0 * 24.0 * 30.0)
    }

    /// Standard error of [`UnitSummary::trend_percent_per_30_days`] (ordinary
    /// least squares: residual variance over n − 2 degrees of freedom, divided
    /// by the spread of the times), when three or more readings span time.
    pub fn trend_standard_error_percent_per_30_days(&self) -> Option<f64> {
        let n = self.trend_n as i128;
        if n < 3 {
            return None;
        }
        // n times the centred sums, exact in integers; the squares in f64.
        let sxx = n * self.trend_sum_tt - self.trend_sum_t * self.trend_sum_t;
        if sxx <= 0 {
            return None;
        }
        let sxy = (n * self.trend_sum_ts - self.trend_sum_t * self.trend_sum_s) as f64;
        let syy = (n * self.trend_sum_ss - self.trend_sum_s * self.trend_sum_s) as f64;
        let (nf, sxx) = (n as f64, sxx as f64);
        let residual = ((syy - sxy * sxy / sxx) / nf).max(0.0);
        let per_minute = (residual / (nf - 2.0) / (sxx / nf)).sqrt() / SOC_SCALE;
        Some(per_minute * 60.0 * 24.0 * 30.0)
    }

    /// Mean heat-ageing factor over readings with a temperature.
    pub fn ageing_factor(&self) -> Option<f64> {
        (self.temp_n > 0).then(|| self.ageing_sum as f64 / AGEING_SCALE / self.temp_n as f64)
    }

    /// The latest reading: its point in the history and its full row.
    pub fn latest(&self) -> Option<(&HistoryPoint, &FleetRow)> {
        self.history.last().zip(self.latest_row.as_deref())
    }

    /// Readings in the kept history taken at the same time as another one.
    pub fn duplicates(&self) -> u64 {
        self.history
            .windows(2)
            .filter(|w| w[0].taken_at == w[1].taken_at)
            .count() as u64
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Runs folded at once (`add_run`, which puts points that come in order
    /// at the history's end in one step) give the summary of the same rows
    /// added one by one, whether the rows come in time order, with equal
    /// times, or shuffled, and however they are cut into runs.
    #[test]
    fn a_run_folds_as_its_rows_one_by_one() {
        use rand::{seq::SliceRandom, Rng, SeedableRng};
        let mut text = String::from("unit_id,taken_at,volts,temp_c,rest_h,profile\n");
        for k in 0..40u32 {
            // Days 1..28 twice over for some, so that times repeat.
            let day = 1 + (k * 7 / 10) % 28;
            let volts = 12.0 + f64::from(k % 9) * 0.08;
            text += &format!("U1,2026-02-{day:02} 08:{:02},{volts:.2},20,24,agm\n", k % 3);
        }
        let rows = super::super::tests::rows_of(text.as_bytes());
        let facts = |k: usize| RowFacts {
            soc: Some((40.0 + (k % 13) as f64 * 4.5, None)),
            rested: k % 5 != 0,
            short_rest: k % 5 == 0,
            ageing: Some(1.0),
        };
        let mut rng = rand::rngs::StdRng::seed_from_u64(11);
        for trial in 0..30 {
            let mut order: Vec<usize> = (0..rows.len()).collect();
            match trial % 3 {
                0 => {}
                1 => order.sort_by_key(|&k| rows[k].taken_at),
                _ => order.shuffle(&mut rng),
            }
            let mut one = UnitSummary::default();
            for &k in &order {
                one.add(rows[k].clone(), facts(k));
            }
            let mut runs = UnitSummary::default();
            let mut points = Vec::new();
            let mut rest = &order[..];
            while !rest.is_empty() {
                let n = rng.gen_range(1..=rest.len().min(25));
                let (run, left) = rest.split_at(n);
                let mut run_rows: Vec<FleetRow> = run.iter().map(|&k| rows[k].clone()).collect();
                let run_facts: Vec<Option<RowFacts>> =
                    run.iter().map(|&k| Some(facts(k))).collect();
                runs.add_run(&mut run_rows, &run_facts, &mut points);
                rest = left;
            }
            assert_eq!(runs.history.len(), HISTORY_CAP);
            assert_eq!(format!("{runs:?}"), format!("{one:?}"), "trial {trial}");
        }
    }

    #[test]
    fn an_absurd_ageing_factor_saturates_without_overflow() {
        // A life-halving rule of 0.001 °C makes 2^(35/0.001) = inf at 60 °C.
        let row = super::super::tests::rows_of(
            b"unit_id,taken_at,volts,temp_c,profile\nU1,2026-01-05 08:00,12.7,60,agm\n",
        )
        .remove(0);
        let mut s = UnitSummary::default();
        for factor in [f64::INFINITY, f64::INFINITY, 1.0] {
            let facts = RowFacts {
                soc: None,
                rested: false,
                short_rest: false,
                ageing: Some(factor),
            };
            s.add_lent(&mut row.clone(), facts);
        }
        let mean = s.ageing_factor().unwrap();
        // (2 × i64::MAX + 1e6) / 1e6 / 3: huge, finite, and not wrapped negative.
        let want = (2.0 * i64::MAX as f64 + 1e6) / 1e6 / 3.0;
        assert!((mean - want).abs() <= 1e-9 * want, "{mean} vs {want}");
    }

    #[test]
    fn minutes_since_2000_are_chronos_duration_in_minutes() {
        // Reference: chrono's own subtraction, as this function once did it.
        use chrono::{NaiveDate, Timelike};
        let epoch = NaiveDate::from_ymd_opt(2000, 1, 1)
            .and_then(|d| d.and_hms_opt(0, 0, 0))
            .unwrap();
        let mut times = vec![
            epoch,
            epoch - chrono::TimeDelta::nanoseconds(1),
            epoch - chrono::TimeDelta::seconds(60),
            epoch - chrono::TimeDelta::milliseconds(60_500),
            epoch + chrono::TimeDelta::milliseconds(59_999),
            // A leap second (chrono holds it as 59 s and 1e9 ns or more).
            NaiveDate::from_ymd_opt(2016, 12, 31)
                .and_then(|d| d.and_hms_nano_opt(23, 59, 59, 1_500_000_000))
                .unwrap(),
            NaiveDate::from_ymd_opt(1969, 12, 31)
                .and_then(|d| d.and_hms_nano_opt(23, 59, 59, 1_000_000_000))
                .unwrap(),
        ];
        let mut x: i64 = 12_345;
        for _ in 0..20_000 {
            // From about 1830 to 2170, to the nanosecond.
            x = (x
                .wrapping_mul(6_364_136_223_846_793_005)
                .wrapping_add(1_442_695_040_888_963_407)
                >> 1)
                % 10_000_000_000_000_000;
            let nanos = (x % 1_000_000_000).unsigned_abs() as u32;
            let t = epoch + chrono::TimeDelta::seconds(x % 10_000_000_000 - 5_000_000_000);
            times.push(t.with_nanosecond(nanos).unwrap());
        }
        for t in times {
            assert_eq!(minutes_since_epoch(t), (t - epoch).num_minutes(), "{t}");
        }
    }

    /// A summary holding only the trend sums of `points` (minutes, 0.001 %).
    fn trend_of(points: &[(i64, i64)]) -> UnitSummary {
        let mut s = UnitSummary::default();
        for &(t, q) in points {
            s.add_trend_point(t, q);
        }
        s
    }

    #[test]
    fn the_trend_and_its_standard_error_are_the_least_squares_ones() {
        // From memory: for y = a + b·x by ordinary least squares,
        // b = Sxy/Sxx and SE(b) = sqrt(SSE/(n − 2)/Sxx) with centred sums
        // (any regression text). Computed here the plain two-pass way.
        let day = 1440;
        let t0 = 12_000_000;
        let points: Vec<(i64, i64)> = [
            (0, 92_000),
            (7, 90_500),
            (14, 88_900),
            (21, 88_100),
            (28, 85_700),
            (35, 84_600),
        ]
        .iter()
        .map(|&(d, q)| (t0 + d * day, q))
        .collect();
        let n = points.len() as f64;
        let mx = points.iter().map(|p| p.0 as f64).sum::<f64>() / n;
        let my = points.iter().map(|p| p.1 as f64).sum::<f64>() / n;
        let sxx: f64 = points.iter().map(|p| (p.0 as f64 - mx).powi(2)).sum();
        let sxy: f64 = points
            .iter()
            .map(|p| (p.0 as f64 - mx) * (p.1 as f64 - my))
            .sum();
        let b = sxy / sxx;
        let sse: f64 = points
            .iter()
            .map(|p| (p.1 as f64 - my - b * (p.0 as f64 - mx)).powi(2))
            .sum();
        let per_30_days = 1440.0 * 30.0 / 1000.0;
        let want_slope = b * per_30_days;
        let want_se = (sse / (n - 2.0) / sxx).sqrt() * per_30_days;
        let s = trend_of(&points);
        let slope = s.trend_percent_per_30_days().unwrap();
        let se = s.trend_standard_error_percent_per_30_days().unwrap();
        assert!((slope - want_slope).abs() < 1e-9, "{slope} vs {want_slope}");
        assert!(
            (se - want_se).abs() < 1e-9 * want_se.max(1.0),
            "{se} vs {want_se}"
        );
        // About −6.2 % per 30 days, known to a few tenths.
        assert!(slope < -5.0 && se > 0.05 && se < 1.0, "{slope} ± {se}");
    }

    #[test]
    fn a_straight_line_has_no_error_and_two_points_no_estimate() {
        let s = trend_of(&[(0, 90_000), (1440, 89_000), (2880, 88_000)]);
        assert!(s.trend_standard_error_percent_per_30_days().unwrap() < 1e-9);
        let s = trend_of(&[(0, 90_000), (1440, 89_000)]);
        assert_eq!(s.trend_standard_error_percent_per_30_days(), None);
    }
}
