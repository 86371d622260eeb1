//! The answer of a plan from placebo runs: power per wait and lift, the minimum detectable
//! effect per wait, the shortest wait that reaches the target power, and the false-positive
//! rate with its binomial interval.
//!
//! **Thresholds.** Each placebo run `k` (a placebo date of a series, a placebo unit of a panel,
//! a simulated data set of a unit table) is summarised, for each wait `w`, by two numbers:
//! `up_k(w)`, the smallest increase (a fraction of the counterfactual) whose verdict would say
//! the metric rose, and `down_k(w)`, the smallest decrease (as a positive fraction) whose
//! verdict would say it fell. The estimator's interval decides both; for a series with
//! multiplicative lifts, `up = 1 / a_lo - 1` and `down = 1 - 1 / a_hi` where `[a_lo, a_hi]` is
//! the HDI of observed sum / counterfactual sum (see [`crate::backtest`]); for a unit table
//! with additive effects `up = -lo / base` and `down = hi / base` (see [`crate::plasmode`]).
//! A negative threshold means the interval excluded zero where nothing happened: a false
//! positive.
//!
//! - power at `(w, δ)`: share of runs with `δ > up_k(w)` (`δ > 0`) or `-δ > down_k(w)`;
//! - MDE at `w`: the `ceil(p K)`-th smallest `up_k(w)`, the exact inverse of the empirical
//!   power curve at target power `p` (floored at zero);
//! - wait for `δ`: the shortest wait from which on the power stays at or above `p` over every
//!   longer wait checked;
//! - false-positive rate: share of runs with a negative threshold at the judged wait, with
//!   the Wilson score interval (Wilson 1927, JASA 22:209) at the plan's level. Placebo windows
//!   of nearby dates overlap, so the runs are not independent and the interval is optimistic.

use aftercast_core::result::{FalsePositiveRate, PlanMde, PlanPower, Planning, WaitFor, count_text, lift_text};

/// One placebo run's thresholds: `(up, down)` per wait of [`Thresholds::waits`].
#[derive(Debug, Clone, PartialEq)]
pub struct Thresholds {
    /// The waits the thresholds are given for, increasing.
    pub waits: Vec<usize>,
    /// Per run, per wait: (smallest increase detected, smallest decrease detected).
    pub runs: Vec<Vec<(f64, f64)>>,
}

/// What the plan is asked.
#[derive(Debug, Clone, PartialEq)]
pub struct PlanQuestion {
    /// Waits shown in the power and MDE tables (each one of the thresholds' waits).
    pub shown: Vec<usize>,
    /// Lifts (fractions; negative for decreases).
    pub lifts: Vec<f64>,
    /// Interval level of the analysis.
    pub level: f64,
    /// Target power.
    pub target: f64,
    /// The wait whose false positives are counted (normally the longest).
    pub judged_wait: usize,
    /// What one step of wait is ("days", "units", ...).
    pub wait_unit: String,
}

/// Whether a lift is seen by a run with thresholds `(up, down)`.
pub fn seen(lift: f64, (up, down): (f64, f64)) -> bool {
    if lift > 0.0 { lift > up } else { -lift > down }
}

/// The `ceil(p n)`-th smallest value (None if there are no values or it is not finite).
pub fn order_stat(mut v: Vec<f64>, p: f64) -> Option<f64> {
    if v.is_empty() || !(p > 0.0 && p <= 1.0) {
        return None;
    }
    v.sort_by(f64::total_cmp);
    let k = ((p * v.len() as f64) - 1e-9).ceil().clamp(1.0, v.len() as f64) as usize;
    let x = v[k - 1];
    x.is_finite().then_some(x)
}

/// Wilson score interval of a share `k / n` at two-sided level `level`.
pub fn wilson(k: usize, n: usize, level: f64) -> (f64, f64) {
    if n == 0 {
        return (0.0, 1.0);
    }
    let z = aftercast_forecast::analysis::normal_quantile(0.5 + level / 2.0);
    let nf = n as f64;
    let p = k as f64 / nf;
    let z2 = z * z;
    let centre = (p + z2 / (2.0 * nf)) / (1.0 + z2 / nf);
    let half = z / (1.0 + z2 / nf) * (p * (1.0 - p) / nf + z2 / (4.0 * nf * nf)).sqrt();
    // exact ends at 0 and n (the closed form leaves a rounding residue there)
    let lower = if k == 0 { 0.0 } else { (centre - half).max(0.0) };
    let upper = if k == n { 1.0 } else { (centre + half).min(1.0) };
    (lower, upper)
}

/// The runs that finished at wait index `j` (a NaN threshold marks a run whose fit failed
/// there: it is left out, not counted as unseen).
fn finished(t: &Thresholds, j: usize) -> impl Iterator<Item = (f64, f64)> + '_ {
    t.runs.iter().map(move |r| r[j]).filter(|x| !(x.0.is_nan() || x.1.is_nan()))
}

/// Power at one wait index and lift (NaN when no run finished there).
fn power_at(t: &Thresholds, j: usize, lift: f64) -> f64 {
    let k = finished(t, j).count();
    if k == 0 {
        return f64::NAN;
    }
    finished(t, j).filter(|x| seen(lift, *x)).count() as f64 / k as f64
}

/// The plan's answer from the runs' thresholds.
pub fn planning(t: &Thresholds, q: &PlanQuestion) -> Planning {
    let index = |w: usize| t.waits.iter().position(|x| *x == w);
    let mut power = Vec::new();
    let mut mde = Vec::new();
    for &w in &q.shown {
        let Some(j) = index(w) else { continue };
        for &lift in &q.lifts {
            power.push(PlanPower { wait: w, lift, power: power_at(t, j, lift) });
        }
        let ups: Vec<f64> = finished(t, j).map(|x| x.0).collect();
        mde.push(PlanMde { wait: w, mde: order_stat(ups, q.target).map(|v| v.max(0.0)) });
    }
    let wait_for: Vec<WaitFor> = q
        .lifts
        .iter()
        .map(|&lift| {
            let ok: Vec<bool> = (0..t.waits.len()).map(|j| power_at(t, j, lift) >= q.target - 1e-12).collect();
            // the shortest wait from which on every longer wait keeps the target power
            let mut first = None;
            for j in (0..ok.len()).rev() {
                if ok[j] {
                    first = Some(t.waits[j]);
                } else {
                    break;
                }
            }
            WaitFor { lift, wait: first }
        })
        .collect();
    let (fp, n) = index(q.judged_wait)
        .map(|j| (finished(t, j).filter(|x| x.0 < 0.0 || x.1 < 0.0).count(), finished(t, j).count()))
        .unwrap_or((0, 0));
    let (lower, upper) = wilson(fp, n, q.level);
    let longest = t.waits.last().copied().unwrap_or(0);
    let answer = wait_for.iter().map(|w| sentence(w, q, longest)).collect();
    Planning {
        level: q.level,
        target_power: q.target,
        wait_unit: q.wait_unit.clone(),
        false_positive_rate: FalsePositiveRate { rate: fp as f64 / n.max(1) as f64, lower, upper, placebos: n },
        power,
        mde,
        wait_for,
        longest_wait: longest,
        answer,
    }
}

/// Warnings a plan's numbers call for: false positives clearly above what the level allows
/// (the lower end of their interval above it).
pub fn warnings(p: &Planning) -> Vec<String> {
    let fp = &p.false_positive_rate;
    let nominal = 1.0 - p.level;
    let mut out = Vec::new();
    if fp.placebos > 0 && fp.placebos < 30 {
        out.push(format!(
            "{} placebo runs give rates with a standard error near {:.0} percentage points (more where their windows overlap): treat power and false positives as rough, or raise --placebos",
            fp.placebos,
            50.0 / (fp.placebos as f64).sqrt()
        ));
    }
    if fp.placebos > 0 && fp.lower > nominal {
        out.push(format!(
            "false positives where nothing happened: {:.0}% of placebo runs, above the {:.0}% the interval level allows: the analysis's intervals are too narrow here, so an effect it reports may be noise; widen the interval (--level) or improve the set-up before trusting a verdict",
            100.0 * fp.rate,
            100.0 * nominal
        ));
    }
    if fp.placebos > 0 && fp.upper < nominal {
        out.push(format!(
            "false positives where nothing happened: {:.0}% of placebo runs, below the {:.0}% the interval level allows: the intervals are wider than the errors at these dates, so the power above is on the cautious side (a change may be seen sooner)",
            100.0 * fp.rate,
            100.0 * nominal
        ));
    }
    // the smallest visible change should fall as the wait grows; where it rises, the errors
    // grow faster than the window
    let m: Vec<(usize, f64)> = p.mde.iter().filter_map(|x| x.mde.map(|v| (x.wait, v))).collect();
    if let Some(w) = m.windows(2).find(|w| w[1].1 > w[0].1 * 1.05) {
        out.push(format!(
            "the smallest visible change grows from {:.1}% after {} to {:.1}% after {} {}: the model's errors grow faster than the window (a drift or trend it does not follow), so waiting longer does not help here; a better model (controls, events, trend) or a shorter wait does",
            100.0 * w[0].1,
            w[0].0,
            100.0 * w[1].1,
            w[1].0,
            p.wait_unit
        ));
    }
    out
}

/// "a +2% change reaches 80% power after 28 days (at 90% intervals)".
fn sentence(w: &WaitFor, q: &PlanQuestion, longest: usize) -> String {
    let change = if w.lift < 0.0 { "fall" } else { "change" };
    let (after, within) = if q.wait_unit == "units" { ("with", "with up to") } else { ("after", "within") };
    match w.wait {
        Some(n) => format!(
            "a {} {change} reaches {:.0}% power {after} {} {} (at {:.0}% intervals)",
            lift_text(w.lift),
            100.0 * q.target,
            count_text(n),
            if n == 1 { q.wait_unit.trim_end_matches('s') } else { q.wait_unit.as_str() },
            100.0 * q.level
        ),
        None => format!(
            "a {} {change} does not reach {:.0}% power {within} {} {}",
            lift_text(w.lift),
            100.0 * q.target,
            count_text(longest),
            q.wait_unit
        ),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn wilson_matches_published_values() {
        // Newcombe (1998), Stat. Med. 17:857, table I, method 3 (Wilson score, 95%), and
        // statsmodels 0.15.0 proportion_confint(k, n, 0.05, method="wilson") to 4 decimals:
        // 81/263 -> 0.2553 to 0.3662; 15/148 -> 0.0624 to 0.1605; 0/10 -> 0 to 0.2775.
        for (k, n, lo, hi) in [(81, 263, 0.2553, 0.3662), (15, 148, 0.0624, 0.1605), (0, 10, 0.0, 0.2775)] {
            let (l, h) = wilson(k, n, 0.95);
            assert!((l - lo).abs() < 5e-5 && (h - hi).abs() < 5e-5, "{k}/{n}: ({l}, {h})");
        }
        assert_eq!(wilson(0, 50, 0.9).0, 0.0);
        assert_eq!(aftercast_core::result::count_text(100_000), "100,000");
        assert_eq!(aftercast_core::result::count_text(999), "999");
        assert_eq!(wilson(50, 50, 0.9).1, 1.0);
    }

    #[test]
    fn power_mde_and_wait_follow_the_thresholds() {
        // four runs, two waits: thresholds shrink with the wait
        let t = Thresholds {
            waits: vec![7, 14],
            runs: vec![
                vec![(0.05, 0.05), (0.01, 0.01)],
                vec![(0.04, 0.06), (0.02, 0.02)],
                vec![(0.03, 0.04), (0.015, 0.01)],
                vec![(-0.01, 0.09), (0.005, 0.03)],
            ],
        };
        let q = PlanQuestion {
            shown: vec![7, 14],
            lifts: vec![0.02, 0.05],
            level: 0.9,
            target: 0.75,
            judged_wait: 7,
            wait_unit: "days".into(),
        };
        let p = planning(&t, &q);
        let pw = |w: usize, l: f64| p.power.iter().find(|x| x.wait == w && x.lift == l).unwrap().power;
        assert_eq!(pw(7, 0.02), 0.25); // only the run with up = -0.01
        assert_eq!(pw(7, 0.05), 0.75); // strictly above 0.05 fails for the first run
        assert_eq!(pw(14, 0.02), 0.75);
        // 3rd smallest of (0.05, 0.04, 0.03, -0.01) and of (0.01, 0.02, 0.015, 0.005)
        assert_eq!(p.mde[0].mde, Some(0.04));
        assert_eq!(p.mde[1].mde, Some(0.015));
        assert_eq!(p.wait_for[0].wait, Some(14));
        assert_eq!(p.wait_for[1].wait, Some(7));
        assert_eq!(p.false_positive_rate.rate, 0.25);
        assert_eq!(p.answer[0], "a +2% change reaches 75% power after 14 days (at 90% intervals)");
    }

    #[test]
    fn warnings_name_small_runs_false_positives_and_a_rising_mde() {
        let t = Thresholds {
            waits: vec![7, 14],
            runs: (0..10)
                .map(|k| vec![(0.02 + 0.001 * k as f64, 0.02), (0.05, if k < 4 { -0.01 } else { 0.03 })])
                .collect(),
        };
        let q = PlanQuestion {
            shown: vec![7, 14],
            lifts: vec![0.02],
            level: 0.9,
            target: 0.8,
            judged_wait: 14,
            wait_unit: "days".into(),
        };
        let p = planning(&t, &q);
        let w = warnings(&p);
        assert!(w.iter().any(|x| x.starts_with("10 placebo runs give rates")), "{w:?}");
        // 4 of 10 false positives: Wilson's 90% interval lies above 10%
        assert!(w.iter().any(|x| x.contains("40% of placebo runs, above the 10%")), "{w:?}");
        assert!(w.iter().any(|x| x.contains("grows from 2.7% after 7 to 5.0% after 14 days")), "{w:?}");
    }

    #[test]
    fn a_dip_below_target_moves_the_wait_on() {
        let t = Thresholds { waits: vec![1, 2, 3], runs: vec![vec![(0.0, 0.0), (0.5, 0.5), (0.0, 0.0)]] };
        let q = PlanQuestion {
            shown: vec![1, 2, 3],
            lifts: vec![0.1, 1.0],
            level: 0.9,
            target: 0.8,
            judged_wait: 3,
            wait_unit: "weeks".into(),
        };
        let p = planning(&t, &q);
        assert_eq!(p.wait_for[0].wait, Some(3));
        assert_eq!(p.wait_for[1].wait, Some(1));
        let never = Thresholds { waits: vec![1, 2], runs: vec![vec![(0.5, 0.5), (0.4, 0.4)]] };
        let p = planning(&never, &PlanQuestion { shown: vec![1, 2], lifts: vec![0.1], ..q });
        assert_eq!(p.wait_for[0].wait, None);
        assert_eq!(p.answer[0], "a +10% change does not reach 80% power within 2 weeks");
    }
}
