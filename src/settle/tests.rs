//! Synthetic data here come from the two published model forms (Aylor, Thieme &
//! Johnson 1992: semi-log; Coleman, Hurley & Lee 2004 / Ceraolo 2000: RC
//! exponential) with chosen 12 V block parameters; the checks compare the
//! fit against those known parameters, and the coverage checks against the
//! nominal 95 % of a Student-t interval (JCGM 100:2008 G.3).

use super::*;
use rand::rngs::StdRng;
use rand::SeedableRng;
use rand_distr::{Distribution, Normal};

/// Readings at 10 min … 8 h, the brief's schedule for a technician's rest.
const TIMES_H: [f64; 14] = [
    10.0 / 60.0,
    20.0 / 60.0,
    0.5,
    0.75,
    1.0,
    1.5,
    2.0,
    2.5,
    3.0,
    4.0,
    5.0,
    6.0,
    7.0,
    8.0,
];
const SIGMA_V: f64 = 0.002;
const RES_V: f64 = 0.001;

fn exp_model(v_inf: f64, amp: f64, tau: f64) -> impl Fn(f64) -> f64 {
    move |t| v_inf + amp * (-t / tau).exp()
}

fn semilog_model(a: f64, b: f64) -> impl Fn(f64) -> f64 {
    move |t| a + b * t.log10()
}

/// Truth plus N(0, σ) noise, rounded to the meter resolution as a display would.
fn noisy(f: &impl Fn(f64) -> f64, times: &[f64], seed: u64, sigma: f64) -> Vec<RestPoint> {
    let mut rng = StdRng::seed_from_u64(seed);
    let noise = Normal::new(0.0, sigma).unwrap();
    times
        .iter()
        .map(|&t| RestPoint {
            elapsed: Hours(t),
            volts: Volts(((f(t) + noise.sample(&mut rng)) / RES_V).round() * RES_V),
        })
        .collect()
}

fn opts(after: Option<RestAfter>) -> SettleOptions {
    SettleOptions {
        after,
        resolution: Volts(RES_V),
        target_rest: Hours(24.0),
        settling_limit_mv_per_h: 1.0,
    }
}

struct Trials {
    covered: usize,
    chosen_right: usize,
    errors_mv: Vec<f64>,
}

fn run_trials(
    f: &impl Fn(f64) -> f64,
    truth: f64,
    model: RelaxationModel,
    after: RestAfter,
) -> Trials {
    let mut out = Trials {
        covered: 0,
        chosen_right: 0,
        errors_mv: Vec::new(),
    };
    for seed in 0..100 {
        let pts = noisy(f, &TIMES_H, seed, SIGMA_V);
        let a = analyse(&pts, &opts(Some(after))).unwrap();
        let fit = a.fit(model).unwrap();
        let (lo, hi) = fit.rested_interval_volts;
        if lo.0 <= truth && truth <= hi.0 {
            out.covered += 1;
        }
        if a.chosen == model {
            out.chosen_right += 1;
        }
        out.errors_mv.push((fit.rested_volts.0 - truth) * 1000.0);
    }
    out
}

fn median_abs(xs: &[f64]) -> f64 {
    let mut v: Vec<f64> = xs.iter().map(|x| x.abs()).collect();
    v.sort_by(|a, b| a.partial_cmp(b).unwrap());
    v[v.len() / 2]
}

#[test]
fn exponential_after_charge_recovers_v_inf_and_covers() {
    // Brief's 12 V block after charge: V∞ 12.70 V, A +0.35 V, τ 3 h.
    let f = exp_model(12.70, 0.35, 3.0);
    let r = run_trials(&f, 12.70, RelaxationModel::Exponential, RestAfter::Charge);
    eprintln!(
        "exp charge: covered {} chosen {} median {:.2} max {:.2}",
        r.covered,
        r.chosen_right,
        median_abs(&r.errors_mv),
        r.errors_mv.iter().fold(0.0_f64, |m, x| m.max(x.abs()))
    );
    // Nominal 95 % interval: at least 90 of 100 (binomial 5th percentile ≈ 91).
    assert!(r.covered >= 90, "coverage {}", r.covered);
    assert!(median_abs(&r.errors_mv) <= 5.0);
    assert!(r.chosen_right >= 90, "chosen {}", r.chosen_right);
}

#[test]
fn exponential_after_discharge_recovers_v_inf_and_covers() {
    // Brief's rising curve after discharge: V∞ 12.40 V, A −0.25 V, τ 3 h.
    let f = exp_model(12.40, -0.25, 3.0);
    let r = run_trials(
        &f,
        12.40,
        RelaxationModel::Exponential,
        RestAfter::Discharge,
    );
    eprintln!(
        "exp discharge: covered {} chosen {} median {:.2} max {:.2}",
        r.covered,
        r.chosen_right,
        median_abs(&r.errors_mv),
        r.errors_mv.iter().fold(0.0_f64, |m, x| m.max(x.abs()))
    );
    assert!(r.covered >= 90, "coverage {}", r.covered);
    assert!(median_abs(&r.errors_mv) <= 5.0);
    assert!(r.chosen_right >= 90, "chosen {}", r.chosen_right);
}

#[test]
fn semilog_both_directions_recover_value_at_target_and_cover() {
    for (a, b, after) in [
        (12.78, -0.06, RestAfter::Charge),
        (12.30, 0.05, RestAfter::Discharge),
    ] {
        let f = semilog_model(a, b);
        let truth = f(24.0);
        let r = run_trials(&f, truth, RelaxationModel::SemiLog, after);
        eprintln!(
            "semilog {after}: covered {} chosen {} median {:.2} max {:.2}",
            r.covered,
            r.chosen_right,
            median_abs(&r.errors_mv),
            r.errors_mv.iter().fold(0.0_f64, |m, x| m.max(x.abs()))
        );
        assert!(r.covered >= 90, "coverage {}", r.covered);
        assert!(median_abs(&r.errors_mv) <= 5.0);
    }
}
