//! Pre-period diagnostics: fit (MAPE, R^2), residual autocorrelation (Ljung-Box), and the
//! check that a control series did not itself break at the intervention.

use serde::{Deserialize, Serialize};

/// Ljung-Box portmanteau test.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct LjungBox {
    /// Number of lags `h`.
    pub lags: usize,
    /// `Q = n (n + 2) sum_{k=1..h} r_k^2 / (n - k)`.
    pub statistic: f64,
    /// `P(chi2_h > Q)`.
    pub p_value: f64,
}

/// Sample autocorrelations `r_1..r_h` of the finite values of `x` (demeaned, denominator the
/// total sum of squares, as in Box & Jenkins).
pub fn autocorrelations(x: &[f64], h: usize) -> Vec<f64> {
    let v: Vec<f64> = x.iter().copied().filter(|v| v.is_finite()).collect();
    let n = v.len();
    let mean = v.iter().sum::<f64>() / n.max(1) as f64;
    let d: Vec<f64> = v.iter().map(|x| x - mean).collect();
    let ss: f64 = d.iter().map(|x| x * x).sum();
    (1..=h).map(|k| if k >= n || ss == 0.0 { 0.0 } else { (k..n).map(|t| d[t] * d[t - k]).sum::<f64>() / ss }).collect()
}

/// Ljung & Box (1978, Biometrika 65:297-303) statistic over `lags` lags (finite values only).
pub fn ljung_box(x: &[f64], lags: usize) -> LjungBox {
    let n = x.iter().filter(|v| v.is_finite()).count() as f64;
    let r = autocorrelations(x, lags);
    let q = n * (n + 2.0) * r.iter().enumerate().map(|(i, rk)| rk * rk / (n - (i + 1) as f64)).sum::<f64>();
    LjungBox { lags, statistic: q, p_value: chi2_sf(q, lags as f64) }
}

/// Survival function of the chi-square distribution, `P(X > x)` with `k` degrees of freedom:
/// the regularised upper incomplete gamma function `Q(k/2, x/2)`
/// (`statrs::function::gamma::checked_gamma_ur`).
///
/// `x` NaN or `x <= 0` gives 1 and `x = +inf` gives 0; `k` NaN, `k <= 0` or `k = +inf` gives
/// NaN (no degrees of freedom to speak of).
pub fn chi2_sf(x: f64, k: f64) -> f64 {
    if x.is_nan() || x <= 0.0 {
        return 1.0;
    }
    if k.is_nan() || k <= 0.0 || k.is_infinite() {
        return f64::NAN;
    }
    if x.is_infinite() {
        return 0.0;
    }
    let half = x / 2.0;
    if half == 0.0 {
        // x is the smallest subnormal: halving it underflows to 0, where Q(a, 0) = 1
        return 1.0;
    }
    statrs::function::gamma::checked_gamma_ur(k / 2.0, half).unwrap_or(f64::NAN)
}

/// Fit of one-step predictions to observations over the pre-period.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct FitStats {
    /// Mean absolute percentage error (percent), over observations that are not zero.
    pub mape: f64,
    /// `1 - SSE / SST` of the predictions.
    pub r_squared: f64,
    /// Root mean squared error.
    pub rmse: f64,
    /// Number of periods used.
    pub n: usize,
}

/// Fit statistics of `pred` against `obs` (pairs where both are finite).
pub fn fit_stats(obs: &[f64], pred: &[f64]) -> FitStats {
    let pairs: Vec<(f64, f64)> =
        obs.iter().zip(pred).filter(|(o, p)| o.is_finite() && p.is_finite()).map(|(o, p)| (*o, *p)).collect();
    let n = pairs.len();
    let mean = pairs.iter().map(|p| p.0).sum::<f64>() / n.max(1) as f64;
    let sse: f64 = pairs.iter().map(|(o, p)| (o - p).powi(2)).sum();
    let sst: f64 = pairs.iter().map(|(o, _)| (o - mean).powi(2)).sum();
    let nz: Vec<f64> = pairs.iter().filter(|(o, _)| *o != 0.0).map(|(o, p)| ((o - p) / o).abs()).collect();
    FitStats {
        mape: 100.0 * nz.iter().sum::<f64>() / nz.len().max(1) as f64,
        r_squared: if sst > 0.0 { 1.0 - sse / sst } else { f64::NAN },
        rmse: (sse / n.max(1) as f64).sqrt(),
        n,
    }
}

/// Result of the break check of one control series at the intervention.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ControlBreak {
    /// Control name.
    pub control: String,
    /// Mean departure of the post-period values from the straight line fitted to the window
    /// before the intervention.
    pub shift: f64,
    /// `shift` divided by the sd of the same statistic at placebo dates in the pre-period
    /// (or by its analytic standard error when there are too few placebo dates).
    pub z: f64,
    /// Placebo dates used (0 = analytic standard error).
    pub placebos: usize,
    /// Share of placebo dates with a departure at least as large in absolute value.
    pub placebo_p: Option<f64>,
    /// Whether the control looks touched: `|z|` above [`break_threshold`] and (with placebos)
    /// larger than every placebo departure.
    pub flagged: bool,
}

/// Threshold of the break check for one control (a common-practice 3-sigma rule, not a
/// calibrated test).
pub const BREAK_Z: f64 = 3.0;

/// Threshold of the break check when `k` controls are checked at once: the two-sided tail of
/// [`BREAK_Z`] (0.27%) split over the `k` checks (Bonferroni), so that with 20 pure-noise
/// controls a false flag is as rare as with one (3.0 for one control, 3.82 for 20).
pub fn break_threshold(k: usize) -> f64 {
    use statrs::distribution::{ContinuousCDF, Normal};
    let n = Normal::standard();
    let tail = 1.0 - n.cdf(BREAK_Z);
    n.inverse_cdf(1.0 - tail / k.max(1) as f64)
}

/// Fewest placebo dates for the placebo-based scale.
pub const MIN_PLACEBOS: usize = 10;

/// Mean departure of `x[at..at + h]` from the line fitted to `x[at - w..at]`, and the line's
/// analytic standard error of that mean (residual sd, projection spread, lag-1 inflation).
fn departure(x: &[f64], at: usize, h: usize, w: usize) -> (f64, f64) {
    let start = at - w;
    let tm = (start + at - 1) as f64 / 2.0;
    let ys = &x[start..at];
    let ym = ys.iter().sum::<f64>() / w as f64;
    let stt: f64 = (start..at).map(|t| (t as f64 - tm).powi(2)).sum();
    let slope =
        if stt > 0.0 { (start..at).zip(ys).map(|(t, y)| (t as f64 - tm) * (y - ym)).sum::<f64>() / stt } else { 0.0 };
    let resid: Vec<f64> = (start..at).zip(ys).map(|(t, y)| y - ym - slope * (t as f64 - tm)).collect();
    let s = (resid.iter().map(|r| r * r).sum::<f64>() / (w.saturating_sub(2).max(1)) as f64).sqrt();
    let rho = autocorrelations(&resid, 1)[0].clamp(-0.9, 0.95);
    let shift = (at..at + h).map(|t| x[t] - (ym + slope * (t as f64 - tm))).sum::<f64>() / h.max(1) as f64;
    let tp = (2 * at + h - 1) as f64 / 2.0;
    let spread = 1.0 / h.max(1) as f64 + 1.0 / w as f64 + if stt > 0.0 { (tp - tm).powi(2) / stt } else { 0.0 };
    (shift, s * ((1.0 + rho) / (1.0 - rho)).sqrt() * spread.sqrt())
}

/// Check a control for a break at the intervention (a Chow-type comparison of the
/// post-period mean against a pre-period fit, scaled by the control's own pre-period noise):
/// fit a straight line to the `w = min(pre, max(3 post, 28))` values before the intervention
/// and take the mean departure of the post-period values from it. The same statistic at every
/// placebo date inside the pre-period (same window, same horizon, ending before the
/// intervention) gives its noise distribution; `z` = departure / sd of the placebo
/// departures, and the control is flagged when `|z| > 3` and the departure exceeds every
/// placebo departure. With fewer than [`MIN_PLACEBOS`] placebo dates the analytic standard
/// error of the line's projection is used instead.
pub fn control_break(
    name: &str,
    x: &[f64],
    pre_end: usize,
    post_start: usize,
    post_end: usize,
    z_crit: f64,
) -> ControlBreak {
    let h = post_end - post_start;
    let w = pre_end.min((3 * h).max(28)).max(3.min(pre_end));
    // the line is fitted on the window ending at pre_end; the post-period starts after the washout
    let shift = departure_at(x, pre_end, post_start, h, w);
    let gap = post_start - pre_end;
    let placebo: Vec<f64> =
        (w..=pre_end.saturating_sub(gap + h)).map(|at| departure_at(x, at, at + gap, h, w)).collect();
    if placebo.len() >= MIN_PLACEBOS {
        let m = placebo.iter().sum::<f64>() / placebo.len() as f64;
        let sd = (placebo.iter().map(|v| (v - m).powi(2)).sum::<f64>() / (placebo.len() - 1) as f64).sqrt();
        let z = if sd > 0.0 {
            shift / sd
        } else if shift != 0.0 {
            f64::INFINITY
        } else {
            0.0
        };
        let beyond = placebo.iter().filter(|v| v.abs() >= shift.abs()).count();
        let p = beyond as f64 / placebo.len() as f64;
        return ControlBreak {
            control: name.to_string(),
            shift,
            z,
            placebos: placebo.len(),
            placebo_p: Some(p),
            flagged: z.abs() > z_crit && beyond == 0,
        };
    }
    // analytic fallback (the washout gap is ignored in the projection spread)
    let (_, se) = departure(x, pre_end, h, w);
    let z = if se > 0.0 {
        shift / se
    } else if shift != 0.0 {
        f64::INFINITY
    } else {
        0.0
    };
    ControlBreak { control: name.to_string(), shift, z, placebos: 0, placebo_p: None, flagged: z.abs() > z_crit }
}

/// Mean departure of `x[from..from + h]` from the line fitted to `x[line_end - w..line_end]`.
fn departure_at(x: &[f64], line_end: usize, from: usize, h: usize, w: usize) -> f64 {
    let start = line_end - w;
    let tm = (start + line_end - 1) as f64 / 2.0;
    let ys = &x[start..line_end];
    let ym = ys.iter().sum::<f64>() / w as f64;
    let stt: f64 = (start..line_end).map(|t| (t as f64 - tm).powi(2)).sum();
    let slope = if stt > 0.0 {
        (start..line_end).zip(ys).map(|(t, y)| (t as f64 - tm) * (y - ym)).sum::<f64>() / stt
    } else {
        0.0
    };
    (from..from + h).map(|t| x[t] - (ym + slope * (t as f64 - tm))).sum::<f64>() / h.max(1) as f64
}

#[cfg(test)]
mod tests {
    use super::chi2_sf;

    #[test]
    fn chi2_sf_matches_scipy() {
        // Reference: scipy.stats.chi2.sf(x, k), scipy 1.17.1; each agrees with mpmath's
        // gammainc(k/2, x/2, inf, regularized=True) at 40 digits to within 1e-14 relative.
        // Rows: (x, k, chi2.sf(x, k)); both branches of Q (series below, continued fraction above
        // a = k/2), a far tail and the Ljung-Box reference statistic of tests/analysis.rs.
        let cases = [
            (3.0, 2.0, 0.22313016014842982),
            (3.0, 10.0, 0.9814240637778593),
            (0.5, 3.0, 0.9188914116546758),
            (30.0, 30.0, 0.4656537089440098),
            (25.651459122036204, 5.0, 0.00010425217423818958),
            (100.0, 5.0, 5.285148360943219e-20),
        ];
        for (x, k, want) in cases {
            let got = chi2_sf(x, k);
            assert!((got - want).abs() <= 1e-12 * want, "chi2_sf({x}, {k}) = {got}, want {want}");
        }
        // Analytic: with 2 degrees of freedom chi2 is exponential with mean 2, P(X > x) = exp(-x/2).
        assert!((chi2_sf(3.0, 2.0) - (-1.5f64).exp()).abs() < 1e-15);
    }

    #[test]
    fn chi2_sf_edge_cases() {
        assert_eq!(chi2_sf(0.0, 3.0), 1.0);
        assert_eq!(chi2_sf(-1.0, 3.0), 1.0);
        assert_eq!(chi2_sf(f64::NAN, 3.0), 1.0);
        assert_eq!(chi2_sf(f64::MIN_POSITIVE * f64::EPSILON, 3.0), 1.0);
        assert_eq!(chi2_sf(f64::INFINITY, 3.0), 0.0);
        assert!(chi2_sf(3.0, 0.0).is_nan());
        assert!(chi2_sf(3.0, -1.0).is_nan());
        assert!(chi2_sf(3.0, f64::NAN).is_nan());
        assert!(chi2_sf(3.0, f64::INFINITY).is_nan());
    }
}
