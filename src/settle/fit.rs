//! The two relaxation models and their least-squares fits.
//!
//! Both fits return a [`ModelFit`] whose interval, AICc and rates are computed
//! the same way, so that [`super::analyse`] can compare them on equal terms.

use super::{ModelFit, RelaxationModel, Trend};
use crate::units::{Hours, Volts};
use statrs::distribution::{ContinuousCDF, StudentsT};

/// Beyond this the settling time is reported as "not within reach" (`None`):
/// a month of rest is longer than any technician waits.
pub(crate) const SETTLE_HORIZON_HOURS: f64 = 30.0 * 24.0;

/// What every fit needs to know besides the readings.
#[derive(Clone, Copy, Debug)]
pub(crate) struct FitContext {
    /// Meter display resolution in volts (> 0).
    pub resolution_volts: f64,
    /// Where the semi-log model is evaluated, hours (> 0).
    pub target_rest_hours: f64,
    /// |dV/dt| below which the voltage counts as steady, mV/h (> 0).
    pub settling_limit_mv_per_h: f64,
}

impl FitContext {
    /// The smallest residual sum of squares taken as real. A meter that shows
    /// 1 mV steps cannot agree with a curve better than its rounding noise,
    /// whose variance is resolution²/12 (uniform quantisation, JCGM 100:2008
    /// F.2.2.1); an exact fit would otherwise give an AICc of −∞ and a
    /// zero-width interval.
    fn rss_floor(&self, n: usize) -> f64 {
        n as f64 * self.resolution_volts * self.resolution_volts / 12.0
    }
}

/// Two-sided 95 % quantile of Student's t on `dof` degrees of freedom.
pub(crate) fn t_975(dof: usize) -> Option<f64> {
    if dof == 0 {
        return None;
    }
    let dist = StudentsT::new(0.0, 1.0, dof as f64).ok()?;
    let q = dist.inverse_cdf(0.975);
    q.is_finite().then_some(q)
}

/// Small-sample Akaike criterion; `k` counts the fitted parameters plus σ.
/// Undefined (returned as +∞) when n ≤ k + 1, which makes the model lose any
/// comparison: with so few readings a choice by AICc means nothing.
pub(crate) fn aicc(rss: f64, n: usize, fitted_parameters: usize) -> f64 {
    let k = (fitted_parameters + 1) as f64;
    let n_f = n as f64;
    if n_f - k - 1.0 <= 0.0 || rss <= 0.0 {
        return f64::INFINITY;
    }
    n_f * (rss / n_f).ln() + 2.0 * k + 2.0 * k * (k + 1.0) / (n_f - k - 1.0)
}

fn trend_from(falling_parameter: f64, half_width: f64) -> Trend {
    if falling_parameter - half_width > 0.0 {
        Trend::Falling
    } else if falling_parameter + half_width < 0.0 {
        Trend::Rising
    } else {
        Trend::Indistinct
    }
}

/// A fit plus the residuals, which the caller needs to name the worst reading.
#[derive(Clone, Debug)]
pub(crate) struct Fitted {
    pub fit: ModelFit,
    pub residuals_volts: Vec<f64>,
}

/// V(t) = a + b·log10(t/1 h), ordinary least squares in x = log10 t
/// (Aylor, Thieme & Johnson 1992). Needs n ≥ 3 and distinct times.
pub(crate) fn fit_semilog(t: &[f64], v: &[f64], ctx: &FitContext) -> Result<Fitted, String> {
    let n = t.len();
    if n < 3 || v.len() != n {
        return Err("the semi-log model needs at least three readings".into());
    }
    let x: Vec<f64> = t.iter().map(|ti| ti.log10()).collect();
    let n_f = n as f64;
    let x_mean = x.iter().sum::<f64>() / n_f;
    let y_mean = v.iter().sum::<f64>() / n_f;
    let sxx: f64 = x.iter().map(|xi| (xi - x_mean).powi(2)).sum();
    let sxy: f64 = x
        .iter()
        .zip(v)
        .map(|(xi, yi)| (xi - x_mean) * (yi - y_mean))
        .sum();
    if sxx.is_nan() || sxx <= 1e-12 {
        return Err("the readings span no measurable range of log time".into());
    }
    let b = sxy / sxx;
    let a = y_mean - b * x_mean;
    let residuals: Vec<f64> = x.iter().zip(v).map(|(xi, yi)| yi - (a + b * xi)).collect();
    let rss: f64 = residuals.iter().map(|r| r * r).sum();
    let dof = n - 2;
    let s2 = rss.max(ctx.rss_floor(n)) / dof as f64;
    let tq = t_975(dof).ok_or("no Student's t quantile for the semi-log fit")?;

    let x0 = ctx.target_rest_hours.log10();
    let rested = a + b * x0;
    let se_mean = (s2 * (1.0 / n_f + (x0 - x_mean).powi(2) / sxx)).sqrt();
    let se_b = (s2 / sxx).sqrt();

    let t_last = t[n - 1];
    // dV/dt = b / (t·ln 10), volts per hour → mV/h.
    let rate_at = |th: f64| b / (th * std::f64::consts::LN_10) * 1000.0;
    let settle_hours = b.abs() * 1000.0 / (std::f64::consts::LN_10 * ctx.settling_limit_mv_per_h);
    let settled_at = (settle_hours <= SETTLE_HORIZON_HOURS).then_some(Hours(settle_hours));

    let fit = ModelFit {
        model: RelaxationModel::SemiLog,
        rested_volts: Volts(rested),
        rested_interval_volts: (Volts(rested - tq * se_mean), Volts(rested + tq * se_mean)),
        residual_sd_mv: (rss / dof as f64).sqrt() * 1000.0,
        aicc: aicc(rss.max(ctx.rss_floor(n)), n, 2),
        rate_at_last_mv_per_h: rate_at(t_last),
        settled_at_elapsed: settled_at,
        degrees_of_freedom: dof,
        // b < 0 is a falling curve.
        trend: trend_from(-b, tq * se_b),
        parameters: vec![("a_volts", a), ("b_volts_per_decade", b)],
    };
    Ok(Fitted {
        fit,
        residuals_volts: residuals,
    })
}

/// For a fixed τ the model is linear in (V∞, A): solve that and return
/// (V∞, A, RSS). `None` when exp(−t/τ) hardly varies over the readings.
fn profile(t: &[f64], v: &[f64], tau: f64) -> Option<(f64, f64, f64)> {
    let n_f = t.len() as f64;
    let e: Vec<f64> = t.iter().map(|ti| (-ti / tau).exp()).collect();
    let e_mean = e.iter().sum::<f64>() / n_f;
    let y_mean = v.iter().sum::<f64>() / n_f;
    let see: f64 = e.iter().map(|ei| (ei - e_mean).powi(2)).sum();
    if see.is_nan() || see <= 1e-18 {
        return None;
    }
    let sey: f64 = e
        .iter()
        .zip(v)
        .map(|(ei, yi)| (ei - e_mean) * (yi - y_mean))
        .sum();
    let amp = sey / see;
    let v_inf = y_mean - amp * e_mean;
    let rss = e
        .iter()
        .zip(v)
        .map(|(ei, yi)| (yi - v_inf - amp * ei).powi(2))
        .sum();
    Some((v_inf, amp, rss))
}

fn profile_rss(t: &[f64], v: &[f64], ln_tau: f64) -> f64 {
    profile(t, v, ln_tau.exp()).map_or(f64::INFINITY, |p| p.2)
}

/// Inverse of a symmetric 3×3 matrix, or `None` when it is numerically singular.
fn invert3(m: [[f64; 3]; 3]) -> Option<[[f64; 3]; 3]> {
    let c00 = m[1][1] * m[2][2] - m[1][2] * m[2][1];
    let c01 = m[1][2] * m[2][0] - m[1][0] * m[2][2];
    let c02 = m[1][0] * m[2][1] - m[1][1] * m[2][0];
    let det = m[0][0] * c00 + m[0][1] * c01 + m[0][2] * c02;
    let scale = m[0][0] * m[1][1] * m[2][2];
    if !(det.is_finite() && scale > 0.0 && det / scale > 1e-13) {
        return None;
    }
    let inv = [
        [
            c00 / det,
            (m[0][2] * m[2][1] - m[0][1] * m[2][2]) / det,
            (m[0][1] * m[1][2] - m[0][2] * m[1][1]) / det,
        ],
        [
            c01 / det,
            (m[0][0] * m[2][2] - m[0][2] * m[2][0]) / det,
            (m[0][2] * m[1][0] - m[0][0] * m[1][2]) / det,
        ],
        [
            c02 / det,
            (m[0][1] * m[2][0] - m[0][0] * m[2][1]) / det,
            (m[0][0] * m[1][1] - m[0][1] * m[1][0]) / det,
        ],
    ];
    Some(inv)
}

/// Points of the coarse log-τ grid before the golden-section refinement.
const TAU_GRID_POINTS: usize = 100;

/// V(t) = V∞ + A·exp(−t/τ), the single RC relaxation of equivalent-circuit
/// models (Coleman, Hurley & Lee 2004; Ceraolo 2000). Variable projection:
/// a coarse grid then golden-section search over ln τ, with (V∞, A) solved
/// linearly at each τ. The V∞ interval comes from the linearised covariance
/// s²·(JᵀJ)⁻¹ at the optimum on n − 3 degrees of freedom.
///
/// The search bracket runs from span/200 to 20 × the last elapsed time. An
/// optimum on either edge means the data do not pin τ down (no curvature, or
/// all of the decay before the second reading), and the model is refused.
pub(crate) fn fit_exponential(t: &[f64], v: &[f64], ctx: &FitContext) -> Result<Fitted, String> {
    let n = t.len();
    if n < 4 || v.len() != n {
        return Err("the exponential model needs at least four readings".into());
    }
    let t_first = t[0];
    let t_last = t[n - 1];
    let span = t_last - t_first;
    if span.is_nan() || span <= 0.0 {
        return Err("the readings span no time".into());
    }
    let lo = (span / 200.0).ln();
    let hi = (20.0 * t_last).ln();
    let step = (hi - lo) / (TAU_GRID_POINTS - 1) as f64;
    let grid: Vec<f64> = (0..TAU_GRID_POINTS)
        .map(|i| profile_rss(t, v, lo + step * i as f64))
        .collect();
    let mut best = 0;
    for (i, r) in grid.iter().enumerate() {
        if *r < grid[best] {
            best = i;
        }
    }
    if !grid[best].is_finite() {
        return Err("no time constant gives a usable fit".into());
    }
    // A clearly better interior point is required; an exact tie with an edge
    // (flat data) is not a located minimum either.
    if best == 0 {
        return Err(
            "the readings show no decay after the first ones: the time constant is shorter than the readings resolve"
                .into(),
        );
    }
    if best == TAU_GRID_POINTS - 1 {
        return Err(
            "the readings show no curvature yet: the time constant is much longer than the readings span, so the asymptote cannot be told"
                .into(),
        );
    }

    // Golden-section refinement between the grid neighbours.
    let inv_phi = (5f64.sqrt() - 1.0) / 2.0;
    let (mut a, mut b) = (lo + step * (best - 1) as f64, lo + step * (best + 1) as f64);
    let mut c = b - inv_phi * (b - a);
    let mut d = a + inv_phi * (b - a);
    let (mut fc, mut fd) = (profile_rss(t, v, c), profile_rss(t, v, d));
    for _ in 0..80 {
        if fc < fd {
            b = d;
            d = c;
            fd = fc;
            c = b - inv_phi * (b - a);
            fc = profile_rss(t, v, c);
        } else {
            a = c;
            c = d;
            fc = fd;
            d = a + inv_phi * (b - a);
            fd = profile_rss(t, v, d);
        }
        if (b - a).abs() < 1e-10 {
            break;
        }
    }
    let ln_tau = 0.5 * (a + b);
    let tau = ln_tau.exp();
    let (v_inf, amp, rss) =
        profile(t, v, tau).ok_or("the exponential fit became degenerate at its optimum")?;

    // Jacobian columns in (V∞, A, ln τ): ln τ keeps the columns on one scale.
    let mut jtj = [[0.0; 3]; 3];
    let mut residuals = Vec::with_capacity(n);
    for (ti, yi) in t.iter().zip(v) {
        let e = (-ti / tau).exp();
        let row = [1.0, e, amp * (ti / tau) * e];
        for r in 0..3 {
            for col in 0..3 {
                jtj[r][col] += row[r] * row[col];
            }
        }
        residuals.push(yi - v_inf - amp * e);
    }
    let cov_unscaled = invert3(jtj)
        .ok_or("the exponential parameters cannot be told apart (singular covariance)")?;
    let dof = n - 3;
    let s2 = rss.max(ctx.rss_floor(n)) / dof as f64;
    let var_v_inf = s2 * cov_unscaled[0][0];
    let var_amp = s2 * cov_unscaled[1][1];
    if !(var_v_inf >= 0.0 && var_amp >= 0.0) {
        return Err("the exponential fit gave a negative variance".into());
    }
    let tq = t_975(dof).ok_or("no Student's t quantile for the exponential fit")?;
    let half = tq * var_v_inf.sqrt();

    // dV/dt = −(A/τ)·exp(−t/τ), volts per hour → mV/h.
    let rate_at = |th: f64| -amp / tau * (-th / tau).exp() * 1000.0;
    let initial_rate = amp.abs() / tau * 1000.0;
    let settled_at = if initial_rate <= ctx.settling_limit_mv_per_h {
        Some(Hours(0.0))
    } else {
        let th = tau * (initial_rate / ctx.settling_limit_mv_per_h).ln();
        (th <= SETTLE_HORIZON_HOURS).then_some(Hours(th))
    };

    let fit = ModelFit {
        model: RelaxationModel::Exponential,
        rested_volts: Volts(v_inf),
        rested_interval_volts: (Volts(v_inf - half), Volts(v_inf + half)),
        residual_sd_mv: (rss / dof as f64).sqrt() * 1000.0,
        aicc: aicc(rss.max(ctx.rss_floor(n)), n, 3),
        rate_at_last_mv_per_h: rate_at(t_last),
        settled_at_elapsed: settled_at,
        degrees_of_freedom: dof,
        // A > 0 decays from above: a falling curve.
        trend: trend_from(amp, tq * var_amp.sqrt()),
        parameters: vec![
            ("v_inf_volts", v_inf),
            ("amplitude_volts", amp),
            ("tau_hours", tau),
        ],
    };
    Ok(Fitted {
        fit,
        residuals_volts: residuals,
    })
}
