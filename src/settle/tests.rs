//! Synthetic data here come from the two published model forms (Aylor, Thieme &
//! Johnson 1992: semi-log; Coleman, Hurley & Lee 2004 / Ceraolo 2000: RC
//! exponential) with chosen 12 V block parameters; the checks compare the
//! fit against those known parameters, and the coverage checks against the
//! nominal 95 % of a Student-t interval (JCGM 100:2008 G.3).

use super::*;
use crate::units::Celsius;
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
    within_5mv: usize,
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
        within_5mv: 0,
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
        let err_mv = (fit.rested_volts.0 - truth) * 1000.0;
        if err_mv.abs() <= 5.0 {
            out.within_5mv += 1;
        }
        out.errors_mv.push(err_mv);
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
    // Brief: final voltage within ±5 mV (σ = 2 mV noise); judged over the trials.
    assert!(r.within_5mv >= 95, "within 5 mV {}", r.within_5mv);
    assert!(median_abs(&r.errors_mv) <= 3.0);
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
    // Brief: final voltage within ±5 mV (σ = 2 mV noise); judged over the trials.
    assert!(r.within_5mv >= 95, "within 5 mV {}", r.within_5mv);
    assert!(median_abs(&r.errors_mv) <= 3.0);
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
        // Brief: final voltage within ±5 mV (σ = 2 mV noise); judged over the trials.
        assert!(r.within_5mv >= 95, "within 5 mV {}", r.within_5mv);
        assert!(median_abs(&r.errors_mv) <= 3.0);
    }
}

#[test]
fn a_fixed_seed_gives_the_final_voltage_within_5_mv() {
    // Brief: recovered within ±5 mV with σ = 2 mV (derived from the model truth).
    let f = exp_model(12.70, 0.35, 3.0);
    let a = analyse(
        &noisy(&f, &TIMES_H, 42, SIGMA_V),
        &opts(Some(RestAfter::Charge)),
    )
    .unwrap();
    assert_eq!(a.chosen, RelaxationModel::Exponential);
    let fit = a.chosen_fit();
    assert!((fit.rested_volts.0 - 12.70).abs() <= 0.005);
    let tau = fit
        .parameters
        .iter()
        .find(|p| p.0 == "tau_hours")
        .unwrap()
        .1;
    assert!((tau - 3.0).abs() < 0.6, "tau {tau}");
    assert_eq!(fit.trend, Trend::Falling);
    assert_eq!(fit.degrees_of_freedom, TIMES_H.len() - 3);
    // Falling curve: negative rate; the exponential still moves ≈ 8 mV/h at
    // 8 h (derived: 350/3·e^(−8/3) mV/h), so not yet steady at 1 mV/h.
    assert!(fit.rate_at_last_mv_per_h < -4.0 && fit.rate_at_last_mv_per_h > -14.0);
    assert!(!a.settled);
}

#[test]
fn rising_and_falling_curves_fit_and_the_wrong_direction_is_refused() {
    let falling = noisy(&exp_model(12.70, 0.35, 3.0), &TIMES_H, 7, SIGMA_V);
    let rising = noisy(&exp_model(12.40, -0.25, 3.0), &TIMES_H, 7, SIGMA_V);
    let a = analyse(&falling, &opts(Some(RestAfter::Charge))).unwrap();
    assert!(a.chosen_fit().rate_at_last_mv_per_h < 0.0);
    let a = analyse(&rising, &opts(Some(RestAfter::Discharge))).unwrap();
    assert!(a.chosen_fit().rate_at_last_mv_per_h > 0.0);
    assert_eq!(a.chosen_fit().trend, Trend::Rising);

    match analyse(&rising, &opts(Some(RestAfter::Charge))) {
        Err(e @ SettleError::WrongDirection { .. }) => {
            let msg = e.to_string();
            assert!(
                msg.contains("should fall") && msg.contains("leads"),
                "{msg}"
            );
        }
        other => panic!("expected WrongDirection, got {other:?}"),
    }
    assert!(matches!(
        analyse(&falling, &opts(Some(RestAfter::Discharge))),
        Err(SettleError::WrongDirection {
            after: RestAfter::Discharge,
            ..
        })
    ));
    // Without `after` nothing is judged.
    assert!(analyse(&rising, &opts(None)).is_ok());
}

#[test]
fn a_flat_series_is_not_called_the_wrong_direction() {
    // Noise only (σ 2 mV around 12.650 V): no direction beyond noise.
    let flat = noisy(&|_| 12.65, &TIMES_H, 11, SIGMA_V);
    for after in [RestAfter::Charge, RestAfter::Discharge] {
        let a = analyse(&flat, &opts(Some(after))).unwrap();
        assert_eq!(a.chosen_fit().trend, Trend::Indistinct);
        assert!((a.chosen_fit().rested_volts.0 - 12.65).abs() < 0.005);
    }
}

fn pts(raw: &[(f64, f64)]) -> Vec<RestPoint> {
    raw.iter()
        .map(|&(t, v)| RestPoint {
            elapsed: Hours(t),
            volts: Volts(v),
        })
        .collect()
}

#[test]
fn degenerate_inputs_are_refused_with_reasons() {
    let o = opts(Some(RestAfter::Charge));
    let e = analyse(&[], &o).unwrap_err();
    assert_eq!(e, SettleError::TooFewReadings { count: 0 });
    let e = analyse(&pts(&[(0.5, 12.9), (2.0, 12.8)]), &o).unwrap_err();
    assert_eq!(e, SettleError::TooFewReadings { count: 2 });
    assert!(e.to_string().contains("add readings"));

    let e = analyse(&pts(&[(0.5, 12.9), (0.5, 12.85), (2.0, 12.8)]), &o).unwrap_err();
    assert!(
        matches!(e, SettleError::NotIncreasing { index: 2, .. }),
        "{e:?}"
    );
    // Elapsed times are printed as a person says them, not as raw hours.
    assert!(
        e.to_string()
            .contains("reading 2 at 30 min is not later than reading 1 at 30 min"),
        "{e}"
    );
    assert!(e.is_input_error());

    let e = analyse(&pts(&[(0.5, 12.9), (1.0, f64::NAN), (2.0, 12.8)]), &o).unwrap_err();
    assert_eq!(e, SettleError::NonFiniteVolts { index: 2 });
    let e = analyse(&pts(&[(0.5, 12.9), (1.0, f64::INFINITY), (2.0, 12.8)]), &o).unwrap_err();
    assert_eq!(e, SettleError::NonFiniteVolts { index: 2 });
    let e = analyse(&pts(&[(0.0, 12.9), (1.0, 12.85), (2.0, 12.8)]), &o).unwrap_err();
    assert!(matches!(e, SettleError::BadElapsed { index: 1, .. }));
    let e = analyse(&pts(&[(f64::NAN, 12.9), (1.0, 12.85), (2.0, 12.8)]), &o).unwrap_err();
    assert!(matches!(e, SettleError::BadElapsed { index: 1, .. }));

    // 10–20 min: span under 15 min; 1–1.5 h: ratio under 2.
    for short in [
        pts(&[
            (10.0 / 60.0, 12.95),
            (15.0 / 60.0, 12.93),
            (20.0 / 60.0, 12.92),
        ]),
        pts(&[(1.0, 12.85), (1.2, 12.84), (1.5, 12.83)]),
    ] {
        let e = analyse(&short, &o).unwrap_err();
        assert!(matches!(e, SettleError::SpanTooShort { .. }), "{e:?}");
        assert!(e.to_string().contains("keep waiting"));
    }

    let ok = pts(&[(0.5, 12.9), (1.0, 12.85), (2.0, 12.8)]);
    for bad in [
        SettleOptions {
            resolution: Volts(0.0),
            ..o
        },
        SettleOptions {
            target_rest: Hours(f64::NAN),
            ..o
        },
        SettleOptions {
            settling_limit_mv_per_h: -1.0,
            ..o
        },
    ] {
        assert!(matches!(
            analyse(&ok, &bad),
            Err(SettleError::BadOptions { .. })
        ));
    }
}

#[test]
fn a_single_spike_is_refused_and_named() {
    // +150 mV on one reading (a contact bounce, a brief charger connection).
    let f = exp_model(12.70, 0.35, 3.0);
    let mut p = noisy(&f, &TIMES_H, 5, SIGMA_V);
    p[6].volts.0 += 0.150;
    match analyse(&p, &opts(Some(RestAfter::Charge))) {
        Err(e @ SettleError::PoorFit { .. }) => {
            let SettleError::PoorFit { worst_index, .. } = e else {
                unreachable!()
            };
            assert_eq!(worst_index, 7);
            assert!(e.to_string().contains("leads"));
        }
        other => panic!("expected PoorFit, got {other:?}"),
    }
    // Also with only three readings (semi-log only).
    let e = analyse(
        &pts(&[(0.5, 12.90), (1.0, 13.05), (2.0, 12.80)]),
        &opts(None),
    )
    .unwrap_err();
    assert!(
        matches!(e, SettleError::PoorFit { worst_index: 2, .. }),
        "{e:?}"
    );
}

#[test]
fn few_readings_fit_the_semilog_only_or_prefer_it() {
    let f = semilog_model(12.78, -0.06);
    let three = noisy(&f, &[0.5, 1.0, 2.0], 1, SIGMA_V);
    let a = analyse(&three, &opts(Some(RestAfter::Charge))).unwrap();
    assert_eq!(a.fits.len(), 1);
    assert_eq!(a.chosen, RelaxationModel::SemiLog);
    assert!(a.notes.iter().any(|n| n.contains("four readings")));
    // One dof: t(0.975, 1) = 12.706 (published t tables) makes a wide interval.
    let (lo, hi) = a.chosen_fit().rested_interval_volts;
    assert!(lo.0 < a.chosen_fit().rested_volts.0 && a.chosen_fit().rested_volts.0 < hi.0);
    // Five readings: AICc of the exponential is undefined (n ≤ k + 1), semi-log wins.
    let five = noisy(&f, &[0.25, 0.5, 1.0, 2.0, 4.0], 1, SIGMA_V);
    let a = analyse(&five, &opts(Some(RestAfter::Charge))).unwrap();
    assert_eq!(a.chosen, RelaxationModel::SemiLog);
    if let Some(e) = a.fit(RelaxationModel::Exponential) {
        assert!(e.aicc.is_infinite());
    }
}

#[test]
fn garbage_never_panics_and_never_gives_a_non_finite_number() {
    let mut rng = StdRng::seed_from_u64(99);
    let u = rand_distr::Uniform::new(-3.0, 3.0);
    let (mut oks, mut errs) = (0, 0);
    for case in 0..300 {
        let n = 3 + case % 6;
        let amp = u.sample(&mut rng) / 3.0;
        let tau = 10f64.powf(u.sample(&mut rng));
        let mut t = 0.0;
        let p: Vec<RestPoint> = (0..n)
            .map(|i| {
                t += 10f64.powf(u.sample(&mut rng));
                let v = match case % 4 {
                    // Extreme magnitudes, 1e−300 … 1e300 V.
                    0 if i == 1 => 10f64.powf(u.sample(&mut rng) * 100.0),
                    // Constant.
                    1 => 12.6,
                    // Any exponential, any τ, 1 mV of jitter.
                    _ => 12.6 + amp * (-t / tau).exp() + u.sample(&mut rng) * 0.0003,
                };
                RestPoint {
                    elapsed: Hours(t),
                    volts: Volts(v),
                }
            })
            .collect();
        match analyse(&p, &opts(Some(RestAfter::Charge))) {
            Ok(a) => {
                oks += 1;
                let f = a.chosen_fit();
                assert!(f.rested_volts.is_finite() && f.rested_interval_volts.0.is_finite());
                assert!(
                    f.rested_interval_volts.1.is_finite() && f.rate_at_last_mv_per_h.is_finite()
                );
            }
            Err(_) => errs += 1,
        }
    }
    // Both branches must have been exercised for the check to mean anything.
    eprintln!("garbage: {oks} fitted, {errs} refused");
    assert!(oks > 10 && errs > 10);
}

/// Noise-free readings every 5 minutes, not rounded.
fn dense(f: &impl Fn(f64) -> f64, end_h: f64) -> Vec<RestPoint> {
    let n = ((end_h - 10.0 / 60.0) * 12.0).round() as usize;
    (0..=n)
        .map(|i| {
            let t = 10.0 / 60.0 + i as f64 / 12.0;
            RestPoint {
                elapsed: Hours(t),
                volts: Volts(f(t)),
            }
        })
        .collect()
}

#[test]
fn settling_verdict_agrees_with_the_finite_difference_on_dense_data() {
    let o = SettleOptions {
        resolution: Volts(0.0001),
        ..opts(Some(RestAfter::Charge))
    };
    // Exponential: |dV/dt| = (A/τ)e^(−t/τ) reaches 1 mV/h at τ·ln(1000A/τ) =
    // 3·ln(116.67) = 14.27 h (derived from the model).
    let f = exp_model(12.70, 0.35, 3.0);
    for end in [10.0, 12.0, 13.5, 15.0, 17.0, 20.0] {
        let a = analyse(&dense(&f, end), &o).unwrap();
        assert_eq!(a.chosen, RelaxationModel::Exponential);
        let fit = a.chosen_fit();
        let truth_rate = -0.35 / 3.0 * (-end / 3.0f64).exp() * 1000.0;
        assert!((fit.rate_at_last_mv_per_h - truth_rate).abs() < 0.02 * truth_rate.abs() + 0.01);
        assert_eq!(
            a.settled,
            a.finite_difference_rate_mv_per_h.abs() < 1.0,
            "end {end}"
        );
        assert_eq!(a.settled, end > 14.27);
        let at = fit.settled_at_elapsed.unwrap().0;
        assert!((at - 14.27).abs() < 0.05, "settled at {at}");
    }
    // Semi-log: |dV/dt| = |b|/(t ln 10) reaches 1 mV/h at 60/ln 10 = 26.06 h
    // for b = −0.06 V/decade (derived from the model).
    let g = semilog_model(12.78, -0.06);
    for end in [12.0, 20.0, 30.0, 40.0] {
        let a = analyse(&dense(&g, end), &o).unwrap();
        assert_eq!(a.chosen, RelaxationModel::SemiLog, "end {end}");
        assert_eq!(
            a.settled,
            a.finite_difference_rate_mv_per_h.abs() < 1.0,
            "end {end}"
        );
        assert_eq!(a.settled, end > 26.06);
        let at = a.chosen_fit().settled_at_elapsed.unwrap().0;
        assert!((at - 26.06).abs() < 0.05, "settled at {at}");
    }
}

fn read(text: &str, end: Option<&str>) -> Result<Vec<RestReading>, SettleError> {
    let end = end.map(|e| chrono::NaiveDateTime::parse_from_str(e, "%Y-%m-%d %H:%M").unwrap());
    read_rest_csv(text.as_bytes(), "rest.csv", end, None)
}

#[test]
fn csv_minutes_hours_and_temperatures() {
    let r = read(
        "Minutes , VOLTS,Temp_C,note\n10,12.93,21,a\n30,12.88,,b\n",
        None,
    )
    .unwrap();
    assert_eq!(r.len(), 2);
    // 10 min = 1/6 h, 30 min = 0.5 h (definition of the units).
    assert!((r[0].point.elapsed.0 - 1.0 / 6.0).abs() < 1e-12);
    assert!((r[1].point.elapsed.0 - 0.5).abs() < 1e-12);
    assert_eq!(r[0].point.volts, Volts(12.93));
    assert_eq!(r[0].temperature, Some(Celsius(21.0)));
    assert_eq!(r[1].temperature, None);
    // 77 °F = 25 °C (definition of the scales).
    let r = read("hours,volts,temp_f\n1,12.7V,77\n", None).unwrap();
    assert!((r[0].temperature.unwrap().0 - 25.0).abs() < 1e-9);
    assert!((r[0].point.elapsed.0 - 1.0).abs() < 1e-12);
}

#[test]
fn csv_decimal_comma_with_semicolons() {
    let r = read("hours;volts\n0,5;12,93\n# a comment\n1,5;12,881\n", None).unwrap();
    assert_eq!(points(&r), pts(&[(0.5, 12.93), (1.5, 12.881)]));
}

#[test]
fn csv_timestamps_count_from_the_event_end() {
    let text = "taken_at,volts\n2024-03-05 14:40,12.93\n2024-03-05T15:30:00,12.88\n";
    let r = read(text, Some("2024-03-05 14:30")).unwrap();
    assert!((r[0].point.elapsed.0 - 1.0 / 6.0).abs() < 1e-9);
    assert!((r[1].point.elapsed.0 - 1.0).abs() < 1e-9);
    assert!(matches!(
        read(text, None),
        Err(SettleError::NeedEventEnd { .. })
    ));
    // Across a clock change (+01:00 → +02:00): 00:30 and 01:30 UTC after an
    // end at 01:00 local +01:00 = 00:00 UTC are 0.5 h and 1.5 h (RFC 3339 arithmetic).
    let text = "taken_at,volts\n2024-03-31T01:30:00+01:00,12.93\n2024-03-31T03:30:00+02:00,12.88\n";
    let r = read(text, Some("2024-03-31 01:00")).unwrap();
    assert!((r[0].point.elapsed.0 - 0.5).abs() < 1e-9);
    assert!((r[1].point.elapsed.0 - 1.5).abs() < 1e-9);
    // A reading before the end is refused at its line.
    let e = read(
        "taken_at,volts\n2024-03-05 14:20,12.93\n",
        Some("2024-03-05 14:30"),
    )
    .unwrap_err();
    assert!(
        e.to_string().starts_with("rest.csv:2: column 'taken_at'"),
        "{e}"
    );
}

#[test]
fn csv_timestamps_more_than_a_day_ahead_of_now_are_refused() {
    let now = chrono::DateTime::parse_from_rfc3339("2026-12-01T12:00:00+00:00").unwrap();
    let at = |text: &str| {
        let end = chrono::NaiveDateTime::parse_from_str("2026-12-01 10:00", "%Y-%m-%d %H:%M");
        read_rest_csv(text.as_bytes(), "rest.csv", Some(end.unwrap()), Some(now))
    };
    // 23 h after now: within the day allowed for a zone ahead of this computer's.
    let ok = "taken_at,volts
2026-12-01 11:00,12.93
2026-12-02 11:00,12.88
";
    assert_eq!(at(ok).unwrap().len(), 2);
    // 25 h after now, at line 3: refused, naming the line and what was expected.
    let e = at("taken_at,volts
2026-12-01 11:00,12.93
2026-12-02 13:00,12.88
")
    .unwrap_err();
    assert!(matches!(e, SettleError::Field { line: 3, .. }), "{e:?}");
    let msg = e.to_string();
    assert!(
        msg.starts_with("rest.csv:3: column 'taken_at': '2026-12-02 13:00' is not a past time")
            && msg.contains("at most a day after now (2026-12-01 12:00 +00:00)"),
        "{msg}"
    );
    // RFC 3339 stamps compare in absolute time: 13:00+02:00 on the 2nd is
    // 11:00 UTC, 23 h after now; 13:00-02:00 is 15:00 UTC, 27 h after.
    let rfc = |t: &str| {
        format!(
            "taken_at,volts
2026-12-01T11:00:00+00:00,12.93
{t},12.88
"
        )
    };
    assert!(at(&rfc("2026-12-02T13:00:00+02:00")).is_ok());
    assert!(matches!(
        at(&rfc("2026-12-02T13:00:00-02:00")),
        Err(SettleError::Field { line: 3, .. })
    ));
    // Without `now` nothing is checked (a stored series read later).
    let late = "taken_at,volts
2099-12-01 11:00,12.93
2099-12-01 12:00,12.88
";
    assert!(read(late, Some("2099-12-01 10:00")).is_ok());
}

#[test]
fn csv_bad_lines_name_file_line_and_column() {
    let e = read("minutes,volts\n10,12.93\n20,twelve\n", None).unwrap_err();
    assert!(matches!(e, SettleError::Field { line: 3, .. }), "{e:?}");
    let msg = e.to_string();
    assert!(
        msg.starts_with("rest.csv:3: column 'volts': 'twelve' is not a positive rest voltage"),
        "{msg}"
    );
    // Comment lines still count for the line number.
    let e = read("# site A\nminutes,volts\n10,12.9\n# x\n-5,12.8\n", None).unwrap_err();
    assert!(
        e.to_string().starts_with("rest.csv:5: column 'minutes'"),
        "{e}"
    );
    let e = read("minutes,volts\n10,-12.9\n", None).unwrap_err();
    assert!(e.to_string().contains("leads are reversed"));
    let e = read("minutes,volts\n10,12.9,3\n", None).unwrap_err();
    assert!(matches!(e, SettleError::Line { line: 2, .. }), "{e:?}");
    for header in [
        "volts\n12.9\n",
        "minutes,hours,volts\n1,1,12.9\n",
        "minutes,temp\n1,2\n",
    ] {
        let e = read(header, None).unwrap_err();
        assert!(matches!(e, SettleError::Header { line: 1, .. }), "{e:?}");
    }
    assert!(matches!(
        read("minutes,volts,temp_c,temp_f\n", None),
        Err(SettleError::Header { .. })
    ));
    assert!(matches!(
        read("minutes,volts\n", None),
        Err(SettleError::Header { .. })
    ));
    let e = read_rest_csv(&[0xff, 0xfe, 0x00][..], "bin.csv", None, None).unwrap_err();
    assert!(matches!(e, SettleError::Line { line: 1, .. }), "{e:?}");
    assert!(e.to_string().contains("UTF-16"), "{e}");
    // 0xB0 is the degree sign in Latin-1 (ISO/IEC 8859-1), not UTF-8.
    let e = read_rest_csv(
        &b"minutes,volts,temp_c\n10,12.9,18\n20,12.8,18\xb0\n"[..],
        "l1.csv",
        None,
        None,
    )
    .unwrap_err();
    assert!(
        e.to_string().starts_with("l1.csv:3: ") && e.to_string().contains("0xB0"),
        "{e}"
    );
}

#[test]
fn implausible_values_name_their_line_and_what_was_expected() {
    // 77 °F is 25 °C (77 − 32) × 5/9 (definition of the scales): named, not guessed.
    let e = read("minutes,volts,temp_c\n10,12.9,18\n20,12.8,77\n", None).unwrap_err();
    let m = e.to_string();
    assert!(
        m.starts_with("rest.csv:3: column 'temp_c': '77'")
            && m.contains("25.0 °C")
            && m.contains("temp_f"),
        "{m}"
    );
    let e = read("minutes,volts,temp_f\n10,12.9,500\n", None).unwrap_err();
    assert!(e.to_string().contains("°F"), "{e}");
    let e = read("minutes,volts\n10,12.9\n20,1e9\n", None).unwrap_err();
    assert!(
        e.to_string().contains("rest.csv:3: column 'volts'") && e.to_string().contains("1000 V"),
        "{e}"
    );
    let e = read("hours,volts\n1,12.9\n100000,12.8\n", None).unwrap_err();
    assert!(
        e.to_string().contains("rest.csv:3: column 'hours'") && e.to_string().contains("10 years"),
        "{e}"
    );
    let e = read("minutes,volts\n10,12.9\n30,12.8\n20,12.7\n", None).unwrap_err();
    assert!(
        e.to_string()
            .starts_with("rest.csv:4: column 'minutes': '20' is not later than line 3 (30 min"),
        "{e}"
    );
    let e = read("minutes,volts\n10,12.9\n10,12.8\n", None).unwrap_err();
    assert!(e.to_string().contains("distinct time"), "{e}");
    let long = format!("minutes,volts\n10,{}\n", "1".repeat(1 << 20));
    let e = read(&long, None).unwrap_err().to_string();
    assert!(
        e.len() < 400,
        "a runaway field is clipped in the message: {} bytes",
        e.len()
    );
    assert!(parse_reading_arg("20m=2000").is_err());
    assert!(parse_reading_arg("100000h=12.8").is_err());
}

#[test]
fn elapsed_times_read_as_people_say_them() {
    assert_eq!(elapsed_text(1.0 / 6.0), "10 min");
    assert_eq!(elapsed_text(0.125), "7.5 min");
    assert_eq!(elapsed_text(1.5), "90 min");
    assert_eq!(elapsed_text(2.5), "2.5 h");
    assert_eq!(elapsed_text(24.0), "24 h");
    assert_eq!(elapsed_text(120.0), "5 d");
}

#[test]
fn hand_typed_readings() {
    assert_eq!(
        parse_reading_arg("30m=12.93").unwrap(),
        pts(&[(0.5, 12.93)])[0]
    );
    assert_eq!(
        parse_reading_arg(" 1h30m = 12,88 ").unwrap(),
        pts(&[(1.5, 12.88)])[0]
    );
    assert_eq!(
        parse_reading_arg("2h=12.81V").unwrap(),
        pts(&[(2.0, 12.81)])[0]
    );
    for bad in [
        "12.93",
        "0m=12.9",
        "unknown=12.9",
        "30m=abc",
        "30=12.9",
        "30m=-12.9",
        "30m=",
    ] {
        let e = parse_reading_arg(bad).unwrap_err();
        assert!(matches!(e, SettleError::ReadingArg { .. }), "{bad}");
        assert!(e.to_string().contains("like 30m=12.93"), "{e}");
    }
}

#[test]
fn student_t_and_aicc_match_their_definitions() {
    // Two-sided 95 % Student t quantiles (published t tables, e.g. NIST/SEMATECH
    // e-Handbook 1.3.6.7.2): 12.706 (1 dof), 2.228 (10), 2.042 (30).
    assert!((super::fit::t_975(1).unwrap() - 12.706).abs() < 1e-3);
    assert!((super::fit::t_975(10).unwrap() - 2.228).abs() < 1e-3);
    assert!((super::fit::t_975(30).unwrap() - 2.042).abs() < 1e-3);
    assert!(super::fit::t_975(0).is_none());
    // AICc = n ln(RSS/n) + 2k + 2k(k+1)/(n−k−1), k = 2 + 1 (Hurvich & Tsai 1989,
    // published form): n = 10, RSS = 1e−5 → 10 ln 1e−6 + 6 + 24/6 = −128.155.
    assert!((super::fit::aicc(1e-5, 10, 2) + 128.155).abs() < 1e-3);
    assert!(super::fit::aicc(1e-5, 4, 2).is_infinite());
}

#[test]
fn a_drift_without_curvature_does_not_fake_an_asymptote() {
    // A slow straight-line drift (0.5 mV/h) holds no information on V∞: the
    // exponential must be declined, not extrapolated.
    let f = |t: f64| 12.9 - 0.0005 * t;
    let times: Vec<f64> = (1..=16).map(|i| i as f64 * 0.5).collect();
    let p: Vec<RestPoint> = times
        .iter()
        .map(|&t| RestPoint {
            elapsed: Hours(t),
            volts: Volts(f(t)),
        })
        .collect();
    let a = analyse(&p, &opts(None)).unwrap();
    assert!(
        a.fit(RelaxationModel::Exponential).is_none(),
        "{:?}",
        a.fits
    );
    assert!(
        a.notes.iter().any(|n| n.contains("no curvature")),
        "{:?}",
        a.notes
    );
    assert_eq!(a.chosen, RelaxationModel::SemiLog);
}
