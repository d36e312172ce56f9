//! Rest time: is the reading settled, and if not, how far can it be from its
//! rested value?
//!
//! After a charge the terminal voltage decays towards its rested value; after
//! a discharge it recovers. The allowance uses the semi-log relaxation form
//! (voltage linear in log time; Aylor, Thieme & Johnson, IEEE Trans. Ind.
//! Electron. 39(5), 1992), pinned to the profile's excess at one hour and to
//! zero at the preferred rest: excess(t) = E₁ₕ · log10(T/t) / log10(T/1 h).

use crate::profile::Profile;
use crate::units::{Hours, Millivolts};
use serde::{Deserialize, Serialize};

/// What happened to the unit before the reading.
#[derive(
    Clone, Copy, Debug, PartialEq, Eq, Default, Serialize, Deserialize, PartialOrd, Ord, Hash,
)]
#[serde(rename_all = "kebab-case")]
pub enum After {
    /// Taken off charge.
    Charge,
    /// After a discharge (load, cranking, capacity test).
    Discharge,
    /// Standing with no charge or discharge for a long time.
    Idle,
    /// On float charge: not a rest voltage at all.
    Float,
    /// Not known.
    #[default]
    Unknown,
}

impl After {
    /// The word as typed.
    pub fn as_str(self) -> &'static str {
        match self {
            After::Charge => "charge",
            After::Discharge => "discharge",
            After::Idle => "idle",
            After::Float => "float",
            After::Unknown => "unknown",
        }
    }
}

/// The rest verdict.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum RestStatus {
    /// At or beyond the preferred rest (or idle): settled.
    Settled,
    /// Beyond the minimum but short of the preferred rest: usable, small allowance.
    Usable,
    /// Below the profile's minimum rest.
    Short,
    /// Rest time not given.
    Unknown,
}

/// The rest assessment of one reading.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct RestAssessment {
    /// Verdict.
    pub status: RestStatus,
    /// Rest time given, if any.
    pub rest_hours: Option<f64>,
    /// The profile's minimum rest.
    pub minimum_hours: f64,
    /// The profile's preferred rest.
    pub preferred_hours: f64,
    /// Hours still to wait until the minimum rest (for `short-rest`).
    pub wait_hours: Option<f64>,
    /// The true rested voltage may be this much lower than the reading (per cell).
    pub allowance_below_mv_per_cell: f64,
    /// The true rested voltage may be this much higher than the reading (per cell).
    pub allowance_above_mv_per_cell: f64,
}

/// Shortest rest the semi-log allowance is evaluated at; below it the form
/// would grow without bound.
const SHORTEST_REST_H: f64 = 5.0 / 60.0;

/// The semi-log excess at a rest time, scaled to `at_1h` at one hour and zero at `preferred`.
pub fn semi_log_excess(at_1h: Millivolts, rest: Hours, preferred: Hours) -> Millivolts {
    RestShape::new(rest, preferred, preferred.0.log10()).excess(at_1h)
}

/// How much of the one-hour excess is left after a rest: shared by both
/// directions of an unknown rest, so that its logarithms are taken once.
/// [`RestShape::excess`] repeats [`semi_log_excess`]'s arithmetic exactly.
#[derive(Clone, Copy)]
enum RestShape {
    /// Nothing left.
    Settled,
    /// `at_1h · (1 − t/T)`, with `1 − t/T` here.
    Linear(f64),
    /// `at_1h · log10(T/t) / log10(T)`, with the two logarithms here.
    SemiLog(f64, f64),
}

impl RestShape {
    /// The shape for `rest` with preferred rest `preferred`, whose log10 is
    /// `log_preferred` (only used on the semi-log branch).
    fn new(rest: Hours, preferred: Hours, log_preferred: f64) -> RestShape {
        let t = rest.0.max(SHORTEST_REST_H);
        if rest.0 >= preferred.0 || preferred.0 <= 1.0 {
            // With a preferred rest of an hour or less the one-hour figure is the most there is.
            return if t >= preferred.0 {
                RestShape::Settled
            } else {
                RestShape::Linear(1.0 - t / preferred.0)
            };
        }
        RestShape::SemiLog((preferred.0 / t).log10(), log_preferred)
    }

    fn excess(self, at_1h: Millivolts) -> Millivolts {
        match self {
            RestShape::Settled => Millivolts(0.0),
            RestShape::Linear(left) => Millivolts(at_1h.0 * left),
            RestShape::SemiLog(log_ratio, log_preferred) => {
                Millivolts(at_1h.0 * log_ratio / log_preferred)
            }
        }
    }
}

/// Judge the rest and the allowance for a reading.
pub fn assess_rest(profile: &Profile, rest: Option<Hours>, after: After) -> RestAssessment {
    let min_h = profile.minimum_rest_hours();
    let pref_h = profile.preferred_rest_hours();
    let charge_1h = Millivolts(profile.spec.rest.surface_charge_mv_per_cell_at_1h.value);
    let recovery_1h = Millivolts(profile.spec.rest.recovery_mv_per_cell_at_1h.value);
    let pref = Hours(pref_h);
    // Unknown rest is judged as if one hour had passed: enough to have walked
    // away from a charger, not enough to trust the reading.
    let effective = rest.unwrap_or(Hours(1.0));
    let shape = || RestShape::new(effective, pref, profile.preferred_rest_log10());
    let (below, above) = match after {
        After::Idle | After::Float => (0.0, 0.0),
        After::Charge => (shape().excess(charge_1h).0, 0.0),
        After::Discharge => (0.0, shape().excess(recovery_1h).0),
        After::Unknown => {
            let shape = shape();
            (shape.excess(charge_1h).0, shape.excess(recovery_1h).0)
        }
    };
    let status = match (rest, after) {
        (_, After::Idle) => RestStatus::Settled,
        (None, _) => RestStatus::Unknown,
        (Some(h), _) if h.0 < min_h => RestStatus::Short,
        (Some(h), _) if h.0 < pref_h => RestStatus::Usable,
        _ => RestStatus::Settled,
    };
    RestAssessment {
        status,
        rest_hours: rest.map(|h| h.0),
        minimum_hours: min_h,
        preferred_hours: pref_h,
        wait_hours: match (status, rest) {
            (RestStatus::Short, Some(h)) => Some(min_h - h.0),
            _ => None,
        },
        allowance_below_mv_per_cell: below,
        allowance_above_mv_per_cell: above,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    #[test]
    fn semi_log_allowance_is_pinned_at_one_hour_and_zero_at_the_preferred_rest() {
        // Form of Aylor, Thieme & Johnson (1992): linear in log10(t).
        let e = |h| semi_log_excess(Millivolts(50.0), Hours(h), Hours(24.0)).0;
        assert_relative_eq!(e(1.0), 50.0, epsilon = 1e-12);
        assert_relative_eq!(e(24.0), 0.0, epsilon = 1e-12);
        // Halfway in log time (√24 h) the excess is half.
        assert_relative_eq!(e(24f64.sqrt()), 25.0, epsilon = 1e-9);
        assert!(e(40.0 / 60.0) > 50.0);
        assert!(e(0.0).is_finite());
    }

    #[test]
    fn the_allowances_are_the_semi_log_excess_of_each_direction() {
        // Reference: semi_log_excess itself, per direction, to the bit; the
        // assessment shares one evaluation of it between the two directions.
        let store = crate::profile::store::ProfileStore::builtin().unwrap();
        for p in store.iter() {
            let pref = Hours(p.preferred_rest_hours());
            let charge = Millivolts(p.spec.rest.surface_charge_mv_per_cell_at_1h.value);
            let recovery = Millivolts(p.spec.rest.recovery_mv_per_cell_at_1h.value);
            for i in 0..=400 {
                let h = Hours(i as f64 * 0.125);
                let r = assess_rest(p, Some(h), After::Unknown);
                let below = semi_log_excess(charge, h, pref).0;
                let above = semi_log_excess(recovery, h, pref).0;
                assert_eq!(r.allowance_below_mv_per_cell.to_bits(), below.to_bits());
                assert_eq!(r.allowance_above_mv_per_cell.to_bits(), above.to_bits());
                let c = assess_rest(p, Some(h), After::Charge);
                assert_eq!(c.allowance_below_mv_per_cell.to_bits(), below.to_bits());
            }
        }
    }
}
