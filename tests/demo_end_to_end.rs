//! `aftercast demo` end to end, through the real binary in a temporary folder: the report,
//! the results and every chart are written, result.json parses into the typed result, and every
//! true effect of the invented scenario lies inside its analysis's interval.

use aftercast_core::result::{AnalysisResult, Summary};
use serde::Deserialize;
use std::process::Command;

#[derive(Debug, Deserialize)]
struct Entry {
    name: String,
    command: String,
    truth: Option<f64>,
    truth_of: Option<String>,
    result: AnalysisResult,
}

#[derive(Debug, Deserialize)]
struct StudyDoc {
    title: String,
    study_file: String,
    analyses: Vec<Entry>,
}

fn summary_of<'a>(r: &'a AnalysisResult, which: &str) -> Option<&'a Summary> {
    match which {
        "average" => Some(&r.effect.average),
        "cumulative" => r.effect.cumulative.as_ref(),
        "relative" => r.effect.relative.as_ref(),
        _ => None,
    }
}

#[test]
fn demo_writes_everything_and_covers_every_true_effect() {
    let dir = tempfile::tempdir().expect("tempdir");
    let out = dir.path().join("fernhill");
    let run =
        Command::new(env!("CARGO_BIN_EXE_aftercast")).args(["demo", "--out"]).arg(&out).output().expect("run demo");
    assert_eq!(run.status.code(), Some(0), "demo failed: {}", String::from_utf8_lossy(&run.stderr));
    let terminal = String::from_utf8_lossy(&run.stdout).to_string();

    for f in ["report.html", "result.json", "study.toml", "truth.json", "data/app_daily.csv", "data/members.csv"] {
        assert!(out.join(f).is_file(), "missing {f}");
    }
    let doc: StudyDoc =
        serde_json::from_slice(&std::fs::read(out.join("result.json")).expect("read")).expect("typed result.json");
    assert!(doc.title.contains("Fernhill"));
    assert!(doc.study_file.contains("[[analysis]]"));
    let verbs: std::collections::BTreeSet<&str> = doc.analyses.iter().map(|a| a.result.verb.as_str()).collect();
    for v in ["forecast", "synthetic", "match"] {
        assert!(verbs.contains(v), "the demo runs no {v} analysis");
    }

    let charts = out.join("charts");
    let mut misses = Vec::new();
    for a in &doc.analyses {
        assert!(a.command.starts_with("aftercast "), "{}: {}", a.name, a.command);
        assert!(!a.result.assumptions.is_empty(), "{}: no assumptions stated", a.name);
        assert!(out.join("analyses").join(format!("{}.json", a.name)).is_file());
        // The views each verb's report promises (docs/report.md), as PNG and SVG.
        let views: &[&str] = match a.result.verb.as_str() {
            "forecast" => &["posterior", "counterfactual", "effect", "running-total"],
            "synthetic" if a.result.method == "sdid" => {
                &["posterior", "treated-vs-synthetic", "effect", "running-total", "weights"]
            }
            "synthetic" => &["posterior", "treated-vs-synthetic", "effect", "running-total", "placebo-gaps", "weights"],
            "match" if a.result.breakdowns.iter().any(|b| b.by == "segment") => &["posterior", "balance", "segment"],
            "match" => &["posterior", "propensity", "balance"],
            "compare" => &["posterior", "versus-truth"],
            "plan" => &["posterior", "power", "mde"],
            "rollout" if a.result.method == "sdid" => &["event-time", "posterior", "wave"],
            "rollout" => &["event-time", "posterior", "wave", "placebo-date"],
            _ => &["posterior"],
        };
        for view in views {
            let png = charts.join(format!("{}-{view}.png", a.name));
            let svg = charts.join(format!("{}-{view}.svg", a.name));
            assert!(png.is_file() && svg.is_file(), "{}: chart {view} missing", a.name);
            let bytes = std::fs::read(&png).expect("png");
            assert!(bytes.starts_with(b"\x89PNG\r\n\x1a\n"), "{}: {view} is not a PNG", a.name);
            let text = std::fs::read_to_string(&svg).expect("svg");
            assert!(text.contains("<svg"), "{}: {view} is not an SVG", a.name);
        }
        if let (Some(truth), Some(which)) = (a.truth, a.truth_of.as_deref()) {
            // judged on the interval every output shows: the HDI
            let s = summary_of(&a.result, which).unwrap_or_else(|| panic!("{}: no {which} summary", a.name));
            if !(s.hdi_lower <= truth && truth <= s.hdi_upper) {
                misses.push(format!(
                    "{}: true {which} effect {truth:.5} outside [{:.5}, {:.5}] (estimate {:.5})",
                    a.name, s.hdi_lower, s.hdi_upper, s.estimate
                ));
            }
        }
    }
    assert!(misses.is_empty(), "true effects outside their intervals:\n{}", misses.join("\n"));

    let html = std::fs::read_to_string(out.join("report.html")).expect("html");
    let truth: serde_json::Value =
        serde_json::from_slice(&std::fs::read(out.join("truth.json")).expect("truth")).expect("truth.json");
    issue_11_one_estimate_everywhere(&out, &doc, &terminal, &html, &truth);
    issue_15_the_plan_before_the_launch(&doc, &terminal, &html, &truth);
    issue_16_answers_first(&out, &doc, &html);
    issue_17_rollout_in_waves(&doc, &terminal, &html);
    for needle in ["<html", "randomized", "aftercast run"] {
        assert!(html.contains(needle), "report.html lacks {needle}");
    }
    assert!(!html.contains("src=\"http") && !html.contains("href=\"http"), "report.html makes external requests");

    let again = Command::new(env!("CARGO_BIN_EXE_aftercast")).args(["demo", "--out"]).arg(&out).output().expect("run");
    assert_eq!(again.status.code(), Some(2), "a non-empty --out must be refused without --force");
}

/// Issue 17: the price cut in three waves, by two cohort estimators and synthetic
/// difference-in-differences per wave, and by region size: event-time, wave and fake-date
/// breakdowns with their joint tests, the two-way decomposition, segments, and the same numbers
/// in the terminal and the report.
fn issue_17_rollout_in_waves(doc: &StudyDoc, terminal: &str, html: &str) {
    let rollouts: Vec<_> = doc.analyses.iter().filter(|a| a.result.verb == "rollout").collect();
    assert_eq!(rollouts.len(), 4, "the demo's rollout analyses");
    for a in &rollouts {
        let r = &a.result;
        let by = |name: &str| r.breakdowns.iter().find(|b| b.by == name);
        let ev = by("event-time").unwrap_or_else(|| panic!("{}: no event-time breakdown", a.name));
        assert!(ev.rows.iter().any(|x| x.key == Some(0.0)), "{}: no effect at adoption", a.name);
        let waves = by("wave").unwrap_or_else(|| panic!("{}: no wave breakdown", a.name));
        assert_eq!(waves.rows.len(), 3, "{}", a.name);
        assert!(waves.test.is_some(), "{}: no equality test of the waves", a.name);
        if r.method != "sdid" {
            assert!(ev.rows.iter().any(|x| x.key.is_some_and(|k| k < -1.0)), "{}: no leads", a.name);
            assert!(ev.test.is_some(), "{}: no joint test of the leads", a.name);
            assert!(by("placebo-date").is_some_and(|b| !b.rows.is_empty()), "{}: no fake dates", a.name);
        }
        // the two-way coefficient and what it averages, on every rollout
        let d = &r.diagnostics["twfe_decomposition"];
        let w: f64 = d["pairs"].as_array().expect("pairs").iter().map(|p| p["weight"].as_f64().unwrap_or(0.0)).sum();
        assert!((w - 1.0).abs() < 1e-9, "{}: decomposition weights sum to {w}", a.name);
        // the terminal shows the same judged interval as the JSON
        let rel = r.effect.relative.expect("relative effect");
        let text = format!("[{:+.2}%, {:+.2}%]", rel.hdi_lower * 100.0, rel.hdi_upper * 100.0);
        assert!(terminal.contains(&text), "{}: terminal lacks {text}", a.name);
        assert!(html.contains(&text), "{}: report lacks {text}", a.name);
    }
    let seg = rollouts.iter().find(|a| a.name == "price-waves-by-size").expect("by size");
    let b = seg.result.breakdowns.iter().find(|b| b.by == "segment").expect("segment breakdown");
    let labels: Vec<&str> = b.rows.iter().map(|x| x.label.as_str()).collect();
    assert_eq!(labels, ["large", "small"]);
    assert!(b.test.as_ref().is_some_and(|t| t.prob_order.is_some()));
    for needle in
        ["Effect by periods since adoption", "Effect by wave", "Effect by segment", "two-way fixed-effects regression"]
    {
        assert!(html.contains(needle), "report.html lacks {needle}");
    }
    let loyalty = doc.analyses.iter().find(|a| a.name == "loyalty-by-age").expect("loyalty by age band");
    assert!(loyalty.result.breakdowns.iter().any(|b| b.by == "segment" && b.rows.len() >= 3));
}

/// Issue 15: the demo's plan of the app launch (the structural forecast's own set-up, placebo
/// dates before the launch): the smallest visible change falls with the wait, and after the
/// whole post-period it is below the launch's true effect; its answer is in every output.
fn issue_15_the_plan_before_the_launch(doc: &StudyDoc, terminal: &str, html: &str, truth: &serde_json::Value) {
    let a = doc.analyses.iter().find(|a| a.result.verb == "plan").expect("the demo plans the launch");
    let p = a.result.planning.as_ref().expect("planning section");
    let mde: Vec<(usize, f64)> = p.mde.iter().map(|m| (m.wait, m.mde.unwrap_or(f64::INFINITY))).collect();
    assert!(mde.windows(2).all(|w| w[1].1 < w[0].1), "the MDE must fall with the wait: {mde:?}");
    let true_effect = truth["app_launch"]["orders"]["relative_effect"].as_f64().expect("true relative effect");
    let post_days = truth["app_launch"]["post_days"].as_u64().expect("post days") as usize;
    let (longest, at_full) = *mde.last().expect("waits");
    assert_eq!(longest, post_days, "the longest wait is the post-period's length");
    assert!(at_full < true_effect, "MDE after {longest} days {at_full} is not below the true {true_effect}");
    // placebo windows end before the launch and false positives are counted
    assert!(p.false_positive_rate.placebos >= 30);
    let sentence = aftercast_report::numbers::plan_sentence(p);
    assert!(terminal.contains(&sentence), "terminal lacks the plan's answer: {sentence}");
    let escaped = sentence.replace('&', "&amp;").replace('\'', "&#39;");
    assert!(html.contains(&sentence) || html.contains(&escaped), "report lacks the plan's answer: {sentence}");
}

/// Issue 11: the terminal, result.json and report.html show the same point and the same
/// interval (the HDI the verdict is judged on); the draws are kept beside the results and the
/// distribution charts draw them; several treated units get a labelled total.
fn issue_11_one_estimate_everywhere(
    out: &std::path::Path,
    doc: &StudyDoc,
    terminal: &str,
    html: &str,
    truth: &serde_json::Value,
) {
    use aftercast_report::numbers::{judged_line, summary_numbers};
    assert!(!html.contains("No draws were kept") && !html.contains("no draws were kept"));
    for a in &doc.analyses {
        let r = &a.result;
        let shown = if r.verb == "compare" { r.effect.average } else { judged_line(r).summary };
        let pct = r.verb != "compare" && judged_line(r).percent;
        let (point, interval) = summary_numbers(&shown, pct, r.outcome_unit.as_deref());
        let block = terminal.split(&format!("== {} ==", a.name)).nth(1).expect("terminal block");
        let block = block.split("\n== ").next().unwrap_or(block);
        assert!(block.contains(&point) && block.contains(&interval), "{}: terminal lacks {point} {interval}", a.name);
        assert!(html.contains(&point) && html.contains(&interval), "{}: report lacks {point} {interval}", a.name);
        // the judged summary's point is the method's own answer, inside its interval
        assert!(shown.hdi_lower <= shown.estimate && shown.estimate <= shown.hdi_upper, "{}", a.name);
        // the draws beside result.json reproduce its summaries
        let kept = aftercast_core::draws_file::read(&out.join("analyses").join(format!("{}.draws.parquet", a.name)))
            .expect("draws file");
        let mean = kept.average.iter().sum::<f64>() / kept.average.len() as f64;
        assert!((mean - r.effect.average.mean).abs() <= 1e-9 * mean.abs().max(1.0), "{}: kept draws", a.name);
    }
    // The spring sale: six regions; the total over them covers the true total, labelled as such.
    let total_truth = truth["regional_sale"]["total_net_effect"].as_f64().expect("true total");
    for a in doc.analyses.iter().filter(|a| a.result.verb == "synthetic") {
        let r = &a.result;
        assert_eq!(r.scope.units, 6, "{}", a.name);
        let t = r.effect.total.expect("total over the treated regions");
        assert!(t.hdi_lower <= total_truth && total_truth <= t.hdi_upper, "{}: total {t:?} vs {total_truth}", a.name);
        let per_unit = r.effect.cumulative.expect("per-region total");
        assert!((t.estimate / per_unit.estimate - 6.0).abs() < 0.5, "{}: total is about six regions' worth", a.name);
    }
    assert!(terminal.contains("total over all 6 treated units") && html.contains("total over all 6 treated units"));
    assert!(terminal.contains("per period, per treated unit") && html.contains("per period, per treated unit"));
}

/// Issue 16: the report opens with one card per question, each with its answer in the
/// outcome's unit, the interval and the known truth; the regional sale is answered by two
/// independent method families; the windows step built the table the Trail Planner match reads.
fn issue_16_answers_first(out: &std::path::Path, doc: &StudyDoc, html: &str) {
    let first_card = html.find("class=\"answer\"").expect("answer cards");
    let first_section = html.find("id=\"analysis-").expect("analysis sections");
    assert!(first_card < first_section, "the answers come before the details");
    let cards = &html[first_card..html.find("id=\"triangulation\"").expect("triangulation")];
    for q in [
        "Did the app feature raise daily app orders?",
        "What did the spring sale add to regional store revenue, net of the dip after?",
        "How much more do loyalty members spend because of the scheme?",
        "Once the novelty week has passed, did the Trail Planner invitation raise what customers order?",
        "What did the footwear price cut do to weekly orders as it reached the regions in three waves, and does the effect grow?",
    ] {
        assert!(cards.contains(q), "no card for {q}");
    }
    assert!(cards.contains(" orders</span>") && cards.contains("+$"), "unit-labelled answers");
    assert_eq!(
        cards.matches("True effect (known for these invented data)").count(),
        5,
        "the truth beside each question's answer"
    );
    assert!(cards.contains("2 independent method families answer it (synthetic control, forecast)"));
    assert!(cards.contains("2 independent method families answer it (difference in differences, synthetic control)"));
    assert!(!html.contains("<details>"), "no raw JSON in the appendix");
    let table = out.join("tables").join("trail-planner-windows.csv");
    let text = std::fs::read_to_string(&table).expect("the windows step's table");
    assert!(text.starts_with("unit,group,exposed,anchor,pre_order_sum"), "{}", &text[..80.min(text.len())]);
    let trail = doc.analyses.iter().find(|a| a.name == "trail-planner-aipw").expect("the match on the windows table");
    assert_eq!(trail.result.sample.as_ref().map(|s| s.treated), Some(2548));
}
