//! The per-unit mergeable summary.
//!
//! A [`UnitSummary`] holds everything the diagnosis needs about one unit in
//! a size that does not grow with its readings: exact integer sums for the
//! state-of-charge trend and the heat-ageing mean, extremes, the earliest
//! ohmic value (a baseline when none is given), and the latest
//! [`HISTORY_CAP`] readings. Merging two summaries of the same unit is
//! associative and commutative — integer sums, min/max, and a
//! "latest K by a total order" set — so files or partitions can be analysed
//! separately, in any order, and combined to the same result as one pass.

use super::ingest::FleetRow;
use crate::correct::After;
use chrono::NaiveDateTime;
use std::cmp::Ordering;

/// Readings kept per unit for history rules (post-charge shortfall, days below threshold, duplicates).
pub const HISTORY_CAP: usize = 12;

/// Fixed-point scale for state of charge sums: 0.001 %.
const SOC_SCALE: f64 = 1000.0;
/// Fixed-point scale for the heat-ageing factor sums.
const AGEING_SCALE: f64 = 1_000_000.0;

/// A reading as kept in a unit's history.
#[derive(Clone, Debug, PartialEq)]
pub struct HistoryPoint {
    /// When taken.
    pub taken_at: NaiveDateTime,
    /// State of charge from the rested reading, 0.001 % units (None if the reading had no usable rest voltage or SG).
    pub soc_milli_percent: Option<i64>,
    /// Its 95 % interval, 0.001 % units.
    pub soc_interval_milli_percent: Option<[i64; 2]>,
    /// What preceded it.
    pub after: After,
    /// Whether the rest was at least the profile's minimum (or the unit idle).
    pub rested: bool,
    /// The full row, for the latest reading's assessment.
    pub row: FleetRow,
    /// Readings of the unit at this same time (1 unless duplicated).
    pub copies: u64,
}

impl HistoryPoint {
    /// State of charge in percent, where the reading gave one.
    pub fn soc_percent(&self) -> Option<f64> {
        self.soc_milli_percent.map(|q| q as f64 / SOC_SCALE)
    }

    /// Its 95 % interval in percent.
    pub fn soc_interval_percent(&self) -> Option<[f64; 2]> {
        self.soc_interval_milli_percent
            .map(|[lo, hi]| [lo as f64 / SOC_SCALE, hi as f64 / SOC_SCALE])
    }

    /// Total order: time, then content, so that the same set of readings is
    /// kept and chosen whatever order they arrive in.
    fn order(&self, other: &HistoryPoint) -> Ordering {
        self.taken_at
            .cmp(&other.taken_at)
            .then_with(|| {
                let a = self.row.volts.map(|v| v.0.to_bits());
                let b = other.row.volts.map(|v| v.0.to_bits());
                a.cmp(&b)
            })
            .then_with(|| {
                let a: Vec<u64> = self.row.sg.iter().map(|s| s.0.to_bits()).collect();
                let b: Vec<u64> = other.row.sg.iter().map(|s| s.0.to_bits()).collect();
                a.cmp(&b)
            })
            .then_with(|| self.soc_milli_percent.cmp(&other.soc_milli_percent))
            .then_with(|| {
                self.row
                    .temperature
                    .map(|t| t.0.to_bits())
                    .cmp(&other.row.temperature.map(|t| t.0.to_bits()))
            })
            // Everything else in the row (ohmic value, note, source, …), so that
            // which of two same-time readings is kept never depends on arrival.
            // Reached only on a tie in all of the above: rare and cheap.
            .then_with(|| format!("{:?}", self.row).cmp(&format!("{:?}", other.row)))
    }
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
    /// Duplicate readings (same unit and time) among the kept history's times:
    /// Σ (copies − 1). Counted on the final kept set, so it is order-free.
    pub duplicates: u64,
    /// Readings with too little rest.
    pub short_rest: u64,
    /// The latest readings, oldest first, at most [`HISTORY_CAP`].
    pub history: Vec<HistoryPoint>,
}

/// Minutes since 2000-01-01 00:00, the trend's time axis.
pub fn minutes_since_epoch(t: NaiveDateTime) -> i64 {
    let epoch = chrono::NaiveDate::from_ymd_opt(2000, 1, 1)
        .and_then(|d| d.and_hms_opt(0, 0, 0))
        .unwrap_or_default();
    (t - epoch).num_minutes()
}

impl UnitSummary {
    /// Fold one reading in. `soc` is the state of charge and its 95 % interval
    /// where the reading gives one; `ageing` the heat-ageing factor at its temperature.
    pub fn add(
        &mut self,
        row: FleetRow,
        soc: Option<(f64, [f64; 2])>,
        rested: bool,
        short_rest: bool,
        ageing: Option<f64>,
    ) {
        self.readings += 1;
        if short_rest {
            self.short_rest += 1;
        }
        let quantise = |x: f64| (x * SOC_SCALE).round() as i64;
        let soc_q = soc.map(|(s, _)| quantise(s));
        let interval_q = soc.map(|(_, [lo, hi])| [quantise(lo), quantise(hi)]);
        if let (Some(s), true) = (soc_q, rested) {
            let t = minutes_since_epoch(row.taken_at) as i128;
            let s = s as i128;
            self.trend_n += 1;
            self.trend_sum_t += t;
            self.trend_sum_tt += t * t;
            self.trend_sum_s += s;
            self.trend_sum_ts += t * s;
        }
        if let Some(t) = row.temperature {
            let q = (t.0 * 1000.0).round() as i64;
            self.coldest_milli_c = Some(self.coldest_milli_c.map_or(q, |c| c.min(q)));
            self.hottest_milli_c = Some(self.hottest_milli_c.map_or(q, |c| c.max(q)));
        }
        if let Some(a) = ageing {
            self.temp_n += 1;
            self.ageing_sum += (a * AGEING_SCALE).round() as i128;
        }
        if let Some(o) = row.ohmic {
            let cand = (row.taken_at, o.0.to_bits());
            self.first_ohmic = Some(match self.first_ohmic {
                Some(f) if f <= cand => f,
                _ => cand,
            });
        }
        let point = HistoryPoint {
            taken_at: row.taken_at,
            soc_milli_percent: soc_q,
            soc_interval_milli_percent: interval_q,
            after: row.after,
            rested,
            row,
            copies: 1,
        };
        self.insert_history(point);
        self.count_duplicates();
    }

    fn insert_history(&mut self, p: HistoryPoint) {
        if let Some(pos) = self.history.iter().position(|h| h.taken_at == p.taken_at) {
            // Keep one of the two by the total order, so the choice is order-free.
            let copies = self.history[pos].copies + p.copies;
            if p.order(&self.history[pos]) == Ordering::Greater {
                self.history[pos] = p;
            }
            self.history[pos].copies = copies;
            return;
        }
        let pos = self
            .history
            .iter()
            .position(|h| p.order(h) == Ordering::Less)
            .unwrap_or(self.history.len());
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
        self.temp_n += other.temp_n;
        self.ageing_sum += other.ageing_sum;
        self.coldest_milli_c = match (self.coldest_milli_c, other.coldest_milli_c) {
            (Some(a), Some(b)) => Some(a.min(b)),
            (a, b) => a.or(b),
        };
        self.hottest_milli_c = match (self.hottest_milli_c, other.hottest_milli_c) {
            (Some(a), Some(b)) => Some(a.max(b)),
            (a, b) => a.or(b),
        };
        self.first_ohmic = match (self.first_ohmic, other.first_ohmic) {
            (Some(a), Some(b)) => Some(a.min(b)),
            (a, b) => a.or(b),
        };
        for p in other.history {
            self.insert_history(p);
        }
        self.count_duplicates();
    }

    /// A running count would depend on arrival order: a copy of a reading
    /// already pushed out of the history is not seen as a copy. Counting on
    /// the kept times is the same whatever the order.
    fn count_duplicates(&mut self) {
        self.duplicates = self.history.iter().map(|h| h.copies - 1).sum();
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

    /// Mean heat-ageing factor over readings with a temperature.
    pub fn ageing_factor(&self) -> Option<f64> {
        (self.temp_n > 0).then(|| self.ageing_sum as f64 / AGEING_SCALE / self.temp_n as f64)
    }

    /// The latest reading.
    pub fn latest(&self) -> Option<&HistoryPoint> {
        self.history.last()
    }
}
