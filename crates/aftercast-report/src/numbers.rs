//! The one place that turns a result's summaries into the numbers people read: which rows are
//! shown (average, cumulative, total over the treated units, relative) under which label, the
//! point answer (`estimate`) and the interval the verdict is judged on (the HDI). The terminal
//! summary and the HTML report both print through here, so they cannot disagree.

use aftercast_core::estimate::Per;
use aftercast_core::result::{AnalysisResult, Judged, Summary};

/// One row of effect numbers.
#[derive(Debug, Clone)]
pub struct EffectLine {
    /// What the row is ("average per period", "total over the treated units", ...).
    pub label: String,
    /// Its summary.
    pub summary: Summary,
    /// Whether the values are fractions shown as percentages.
    pub percent: bool,
    /// Whether the verdict was judged on this row's interval.
    pub judged: bool,
}

/// The rows of a result, in the order shown everywhere: the judged quantity first.
pub fn effect_lines(r: &AnalysisResult) -> Vec<EffectLine> {
    let judged = r.judged_on.quantity;
    let mut lines = Vec::new();
    if let Some(rel) = r.effect.relative {
        lines.push(EffectLine {
            label: "relative to the counterfactual".into(),
            summary: rel,
            percent: true,
            judged: judged == Judged::Relative,
        });
    }
    lines.push(EffectLine {
        label: format!("average {}", r.scope.average_label()),
        summary: r.effect.average,
        percent: false,
        judged: judged != Judged::Relative,
    });
    if let Some(c) = r.effect.cumulative {
        lines.push(EffectLine { label: r.scope.cumulative_label().into(), summary: c, percent: false, judged: false });
    }
    if let Some(t) = r.effect.total {
        lines.push(EffectLine {
            label: format!("total over all {} treated units", r.scope.units),
            summary: t,
            percent: false,
            judged: false,
        });
    }
    lines.sort_by_key(|l| !l.judged);
    lines
}

/// The row the verdict was judged on.
pub fn judged_line(r: &AnalysisResult) -> EffectLine {
    effect_lines(r).into_iter().find(|l| l.judged).unwrap_or_else(|| EffectLine {
        label: "average".into(),
        summary: r.effect.average,
        percent: false,
        judged: true,
    })
}

/// Decimals that give three significant figures to the largest magnitude of a group, so a
/// point and its interval share one format.
pub fn decimals_for(values: &[f64]) -> usize {
    let m = values.iter().filter(|v| v.is_finite()).fold(0.0_f64, |a, v| a.max(v.abs()));
    if m == 0.0 {
        return 0;
    }
    (2.0 - m.log10().floor()).clamp(0.0, 6.0) as usize
}

/// A signed number with `decimals` decimals and thousands separators.
pub fn signed(v: f64, decimals: usize) -> String {
    if !v.is_finite() {
        return "n/a".into();
    }
    let s = format!("{:.decimals$}", v.abs());
    let (int, frac) = s.split_once('.').map_or((s.as_str(), None), |(i, f)| (i, Some(f)));
    let mut grouped = String::new();
    for (i, c) in int.chars().enumerate() {
        if i > 0 && (int.len() - i) % 3 == 0 {
            grouped.push(',');
        }
        grouped.push(c);
    }
    let body = match frac {
        Some(f) => format!("{grouped}.{f}"),
        None => grouped,
    };
    if body.chars().all(|c| c == '0' || c == '.' || c == ',') {
        return body;
    }
    format!("{}{body}", if v < 0.0 { "-" } else { "+" })
}

/// A signed percentage (fractions in), two decimals, or more for very small values.
pub fn percent(v: f64) -> String {
    if !v.is_finite() {
        return "n/a".into();
    }
    signed(v * 100.0, 2) + "%"
}

/// Point and interval of a summary in one shared format: (`"+1,234"`, `"[+1,010, +1,460]"`).
/// The interval is the highest-density interval, the one the verdict is judged on.
pub fn point_and_interval(s: &Summary, pct: bool) -> (String, String) {
    if pct {
        return (percent(s.estimate), format!("[{}, {}]", percent(s.hdi_lower), percent(s.hdi_upper)));
    }
    let d = decimals_for(&[s.estimate, s.hdi_lower, s.hdi_upper]);
    (signed(s.estimate, d), format!("[{}, {}]", signed(s.hdi_lower, d), signed(s.hdi_upper, d)))
}

/// Whether a unit label is a currency sign, written before the digits ("$", "€", "US$").
pub fn is_currency(label: &str) -> bool {
    !label.is_empty() && (label.chars().all(|c| !c.is_alphanumeric()) || label.ends_with('$'))
}

/// A formatted signed number with the outcome's unit label: a currency sign between the sign
/// and the digits (`+$1,250`), a word after the number (`+106 orders`); unchanged without one.
pub fn with_unit(text: &str, unit: Option<&str>) -> String {
    match unit {
        None => text.to_string(),
        Some(_) if text == "n/a" => text.to_string(),
        Some(u) if is_currency(u) => match text.chars().next() {
            Some(s @ ('+' | '-')) => format!("{s}{u}{}", &text[1..]),
            _ => format!("{u}{text}"),
        },
        Some(u) => format!("{text} {u}"),
    }
}

/// Point and interval of one effect row as every output shows it: percentages for relative
/// rows, numbers with the outcome's unit label otherwise.
pub fn line_numbers(r: &AnalysisResult, line: &EffectLine) -> (String, String) {
    summary_numbers(&line.summary, line.percent, r.outcome_unit.as_deref())
}

/// Point and interval of a summary with an optional unit label (ignored for percentages).
pub fn summary_numbers(s: &Summary, pct: bool, unit: Option<&str>) -> (String, String) {
    if pct || unit.is_none() {
        return point_and_interval(s, pct);
    }
    summary_numbers_at(s, decimals_for(&[s.estimate, s.hdi_lower, s.hdi_upper]), unit)
}

/// [`summary_numbers`] in outcome units with given decimals (rows of one table share them).
pub fn summary_numbers_at(s: &Summary, d: usize, unit: Option<&str>) -> (String, String) {
    let f = |v: f64| with_unit(&signed(v, d), unit);
    match unit {
        // a word is said once, after the interval: [+68, +135] orders
        Some(u) if !is_currency(u) => {
            (f(s.estimate), format!("[{}, {}] {u}", signed(s.hdi_lower, d), signed(s.hdi_upper, d)))
        }
        _ => (f(s.estimate), format!("[{}, {}]", f(s.hdi_lower), f(s.hdi_upper))),
    }
}

/// The row in outcome units a reader weighs the answer by: the total over all treated units,
/// else the total over the post-period, else the average.
pub fn units_line(r: &AnalysisResult) -> EffectLine {
    let lines = effect_lines(r);
    if r.scope.per == aftercast_core::estimate::Per::UnitPeriod {
        // a rollout: the effect per adopted unit and period reads better than a total over them
        if let Some(l) = lines.iter().find(|l| !l.percent && l.label.starts_with("average")) {
            return l.clone();
        }
    }
    let pick = |starts: &str| lines.iter().find(|l| !l.percent && l.label.starts_with(starts)).cloned();
    pick("total over all")
        .or_else(|| lines.iter().find(|l| !l.percent && !l.label.starts_with("average")).cloned())
        .or_else(|| pick("average"))
        .unwrap_or_else(|| judged_line(r))
}

/// The name of the interval shown: "90% HDI".
pub fn interval_name(level: f64) -> String {
    format!("{:.0}% HDI", level * 100.0)
}

/// What kind of answer a result gives: an effect with a verdict, or an evaluation of methods
/// (a comparison with an experiment, a history, a placebo backtest, a plasmode simulation),
/// whose effect block describes errors or estimates rather than what a change did.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Kind {
    /// An effect of a change, with its verdict.
    Effect,
    /// Observational methods against a randomized experiment.
    Comparison,
    /// Bias of methods over recorded comparisons.
    History,
    /// A plan: how long to wait (or how many units to have) to see a change.
    Plan,
    /// Simulated data with a known effect.
    Plasmode,
}

/// The kind of a result.
pub fn kind(r: &AnalysisResult) -> Kind {
    match (r.verb.as_str(), r.method.as_str()) {
        ("compare", "history-summary") => Kind::History,
        ("compare", "plasmode") => Kind::Plasmode,
        ("compare", _) => Kind::Comparison,
        ("plan", _) => Kind::Plan,
        _ => Kind::Effect,
    }
}

/// The result's first sentence everywhere (terminal, report cards, the analysis section): the
/// verdict and the judged effect for an effect; for an evaluation of methods, what its numbers
/// are, with no verdict about a change.
pub fn headline(r: &AnalysisResult) -> String {
    let hdi = interval_name(r.level);
    let (p, i) = summary_numbers(&r.effect.average, false, r.outcome_unit.as_deref());
    match kind(r) {
        Kind::Effect => lead_sentence(r),
        Kind::Comparison => {
            let rows = r.estimates.as_deref().unwrap_or(&[]);
            let cover = rows.iter().filter(|e| e.covers_truth).count();
            format!(
                "The randomized experiment's answer: {p} per treated unit, {hdi} {i}; {cover} of {} observational estimates cover it.",
                rows.len()
            )
        }
        Kind::History => format!(
            "Over {} recorded comparisons the methods' mean bias (estimate minus truth) is {p}, {hdi} {i}; see the per-method table.",
            r.scope.units
        ),
        Kind::Plan => match r.planning.as_ref() {
            Some(p) => plan_sentence(p),
            None => "A plan without a planning section.".into(),
        },
        Kind::Plasmode => format!(
            "Simulated data with a known effect: the first method's estimates average {p}, {hdi} {i}; the table compares every method with the known effect."
        ),
    }
}

/// A plan's answer in one sentence: "A +2% change reaches 80% power after 28 days, a +5%
/// change after 7 days; a +1% change does not within 121 days (90% intervals; false positives
/// where nothing happened: 6% of 50 placebo runs)."
pub fn plan_sentence(p: &aftercast_core::result::Planning) -> String {
    use aftercast_core::result::{count_text, lift_text};
    let target = format!("{:.0}%", 100.0 * p.target_power);
    let unit = |n: usize| if n == 1 { p.wait_unit.trim_end_matches('s').to_string() } else { p.wait_unit.clone() };
    let (after, within) = if p.wait_unit == "units" { ("with", "with") } else { ("after", "within") };
    let mut reached: Vec<_> = p.wait_for.iter().filter_map(|w| w.wait.map(|n| (w.lift, n))).collect();
    reached.sort_by(|a, b| a.0.abs().total_cmp(&b.0.abs()));
    let mut parts = Vec::new();
    for (k, (lift, n)) in reached.iter().enumerate() {
        let what = if *lift < 0.0 { "fall" } else { "change" };
        parts.push(if k == 0 {
            format!("a {} {what} reaches {target} power {after} {} {}", lift_text(*lift), count_text(*n), unit(*n))
        } else {
            format!("a {} {what} {after} {} {}", lift_text(*lift), count_text(*n), unit(*n))
        });
    }
    let mut text = parts.join(", ");
    let missed: Vec<String> = p.wait_for.iter().filter(|w| w.wait.is_none()).map(|w| lift_text(w.lift)).collect();
    if !missed.is_empty() {
        let who = if missed.len() == 1 {
            format!("a {} change does", missed[0])
        } else {
            format!("changes of {} do", missed.join(", "))
        };
        let longest = count_text(p.longest_wait);
        let miss = format!("{who} not reach it {within} {longest} {}", p.wait_unit);
        text = if text.is_empty() {
            format!("{who} not reach {target} power {within} {longest} {}", p.wait_unit)
        } else {
            format!("{text}; {miss}")
        };
    }
    let fp = &p.false_positive_rate;
    let mut out = format!(
        "{text} ({:.0}% intervals; false positives where nothing happened: {:.0}% of {} placebo runs).",
        100.0 * p.level,
        100.0 * fp.rate,
        fp.placebos
    );
    if let Some(first) = out.get(..1) {
        out = first.to_uppercase() + &out[1..];
    }
    out
}

/// One sentence: the verdict, the judged effect with the interval the verdict uses, and the
/// effect in the outcome's units (or, when the verdict is judged in units, relative to the
/// counterfactual) with its interval.
pub fn lead_sentence(r: &AnalysisResult) -> String {
    let line = judged_line(r);
    let (p, i) = line_numbers(r, &line);
    let scope = match (r.scope.per, r.scope.units, line.percent) {
        (Per::Period, n, false) if n > 1 => format!(" (per treated unit; {n} treated units)"),
        _ => String::new(),
    };
    let hdi = interval_name(r.level);
    let mut s = format!("Verdict: {}. {}: {p}, {hdi} {i}{scope}", r.verdict.word(), effect_words(&line.label));
    let other = if line.percent {
        Some(units_line(r)).filter(|l| !l.percent)
    } else {
        effect_lines(r).into_iter().find(|l| l.percent)
    };
    if let Some(o) = other.filter(|o| o.summary.estimate.is_finite()) {
        let (op, oi) = line_numbers(r, &o);
        let what = if o.percent { "relative to the counterfactual".to_string() } else { o.label.clone() };
        let _ = std::fmt::Write::write_fmt(&mut s, format_args!("; {what}: {op}, {oi}"));
    }
    s.push('.');
    s
}

/// "average per period" -> "Average effect per period"; "relative to the counterfactual" ->
/// "Effect relative to the counterfactual"; a total keeps its own words.
pub fn effect_words(label: &str) -> String {
    if let Some(rest) = label.strip_prefix("average ") {
        format!("Average effect {rest}")
    } else if label.starts_with("total") {
        format!("Effect, {label}")
    } else {
        format!("Effect {label}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn point_and_interval_share_decimals() {
        assert_eq!(decimals_for(&[93.78, 184.2]), 0);
        assert_eq!(decimals_for(&[9.5, 1.2]), 2);
        assert_eq!(decimals_for(&[0.0123]), 4);
        assert_eq!(signed(1794.34, 0), "+1,794");
        assert_eq!(signed(-8498.0, 0), "-8,498");
        assert_eq!(signed(-0.0001, 2), "0.00");
        assert_eq!(percent(0.0312), "+3.12%");
        assert_eq!(with_unit("+1,250", Some("$")), "+$1,250");
        assert_eq!(with_unit("-5.06", Some("€")), "-€5.06");
        assert_eq!(with_unit("0", Some("US$")), "US$0");
        assert_eq!(with_unit("+106", Some("orders")), "+106 orders");
        assert_eq!(with_unit("n/a", Some("$")), "n/a");
        assert_eq!(with_unit("+3", None), "+3");
    }
}
