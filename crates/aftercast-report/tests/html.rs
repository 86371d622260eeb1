//! HTML report: well-formed (parsed as XML), every section present, no external URL, charts
//! inline, the numbers and words of each analysis shown, and the triangulation rule.
//!
//! Set `AFTERCAST_REPORT_OUT=/some/report.html` to keep the page for looking at it.

mod common;

use aftercast_core::result::{AnalysisResult, Verdict};
use aftercast_report::charts;
use aftercast_report::html::{
    self, Agreement, KnownTruth, Quantity, ReportAnalysis, ReportInput, StudyFile, TableStep, TruthOf,
};

fn analysis(label: &str, stem: &str, question: Option<&str>, result: AnalysisResult) -> ReportAnalysis {
    let (draws, figures) = common::inputs_for(stem);
    ReportAnalysis {
        label: label.into(),
        question: question.map(str::to_string),
        result,
        draws,
        figures,
        tables: Vec::new(),
        stem: stem.into(),
        truth: None,
    }
}

fn study() -> ReportInput {
    let mut second = common::forecast();
    second.method = "holt-winters".into();
    second.effect.relative = Some(common::summary(0.03, 0.007));
    let mut first = analysis("Forecast: structural model", "forecast", Some("onboarding"), common::forecast());
    first.result.outcome_unit = Some("users".into());
    first.truth = Some(KnownTruth { value: 0.034, of: TruthOf::Relative });
    let mut sale = analysis(
        "Synthetic control of the sale regions <north & west>",
        "synthetic",
        Some("sale"),
        common::synthetic(),
    );
    sale.result.outcome_unit = Some("$".into());
    ReportInput {
        title: "Did the new onboarding move weekly active users?".into(),
        question: "We released the new onboarding to everyone on 1 May 2025. Did weekly active users move, by how much, and how sure are we?".into(),
        analyses: vec![
            first,
            analysis("Forecast: Holt-Winters", "forecast-hw", Some("onboarding"), second),
            sale,
            analysis("Loyalty scheme: nearest-neighbour matching", "match", None, common::matching()),
            analysis("Check against last year's holdout", "compare", None, common::compare()),
            analysis("How long to wait: placebo backtests", "backtest", None, common::backtest()),
        ],
        tables: vec![TableStep {
            name: "windows".into(),
            describe: Some("Event log to one row per user".into()),
            command: "aftercast windows --events e.csv --exposures x.csv --window 14d --output t.csv".into(),
            output: "t.csv".into(),
            rows: 1200,
            columns: vec!["unit".into(), "exposed".into()],
        }],
        command: "aftercast run study.toml --out report".into(),
        study_file: Some(StudyFile { path: "study.toml".into(), contents: "[data.users]\npath = \"users.csv\"\n\n[[analysis]]\nverb = \"forecast\"\n".into() }),
    }
}

/// Parse as XML; the HTML5 doctype is allowed.
fn parse(text: &str) -> Result<roxmltree::Document<'_>, roxmltree::Error> {
    roxmltree::Document::parse_with_options(text, roxmltree::ParsingOptions { allow_dtd: true, ..Default::default() })
}

/// Attributes that would make a browser fetch something.
const FETCHING_ATTRS: [&str; 6] = ["src", "href", "action", "poster", "data", "srcset"];

#[test]
fn report_is_well_formed_complete_and_self_contained() {
    let input = study();
    let page = html::render(&input);
    if let Some(p) = std::env::var_os("AFTERCAST_REPORT_OUT") {
        std::fs::write(p, &page).expect("keep the page");
    }
    let doc = parse(&page).expect("the report parses as XML");
    assert_eq!(doc.root_element().tag_name().name(), "html");

    // every section, in order
    let ids: Vec<&str> =
        doc.descendants().filter(|n| n.has_tag_name("section")).filter_map(|n| n.attribute("id")).collect();
    let mut expected = vec!["answers", "triangulation"];
    let analysis_ids: Vec<String> = input.analyses.iter().map(|a| format!("analysis-{}", a.stem)).collect();
    expected.extend(analysis_ids.iter().map(String::as_str));
    expected.extend(["data", "appendix", "caution", "reproduce"]);
    assert_eq!(ids, expected);

    // the answers come first: one card per question, then one per analysis without a question;
    // each question card holds a number in the outcome's unit, the interval and the truth given
    let cards: Vec<roxmltree::Node> =
        doc.descendants().filter(|n| n.has_tag_name("article") && n.attribute("class") == Some("answer")).collect();
    assert_eq!(cards.len(), 2 + 3, "2 questions, then the match, compare and plan analyses");
    let card_text =
        |n: &roxmltree::Node| -> String { n.descendants().filter(|d| d.is_text()).filter_map(|d| d.text()).collect() };
    let first_card = card_text(&cards[0]);
    assert!(first_card.trim_start().starts_with("onboarding"), "the first question first: {first_card}");
    let cum = common::forecast().effect.cumulative.expect("cumulative");
    let d = aftercast_report::numbers::decimals_for(&[cum.estimate, cum.hdi_lower, cum.hdi_upper]);
    let point = aftercast_report::numbers::signed(cum.estimate, d);
    assert!(first_card.contains(&format!("{point} users")), "the total in the outcome's unit: {first_card}");
    assert!(first_card.contains("90% HDI ["), "the interval: {first_card}");
    assert!(first_card.contains("True effect (known for these invented data): +3.40%"), "the truth: {first_card}");
    assert!(first_card.contains("methods agree") || first_card.contains("methods compatible"), "{first_card}");
    assert!(first_card.contains("one family (forecast)"), "agreement within one family is named as such");
    let sale_card = card_text(&cards[1]);
    assert!(
        sale_card.contains("-$190") && sale_card.contains("[-$257, -$123]"),
        "a currency sign after the sign: {sale_card}"
    );
    // the cards come before any analysis section in the page
    let page_pos = |needle: &str| page.find(needle).expect(needle);
    assert!(page_pos("class=\"answer\"") < page_pos("id=\"analysis-forecast\""));
    // diagnostics are tables and sentences, never raw JSON
    assert!(!page.contains("<pre>{") && !page.contains("<details>"), "no raw JSON dump");
    // the table the run built is shown with the data
    assert!(page.contains("Built by the run: windows"));

    // no external requests: no fetching attribute leaves the page, no @import / url() in CSS, no scripts
    for n in doc.descendants().filter(|n| n.is_element()) {
        for a in n.attributes() {
            if FETCHING_ATTRS.contains(&a.name()) {
                let v = a.value();
                assert!(v.starts_with('#'), "<{} {}=\"{v}\"> points outside the page", n.tag_name().name(), a.name());
            }
        }
        assert!(
            !n.has_tag_name("script") && !n.has_tag_name("link") && !n.has_tag_name("img") && !n.has_tag_name("iframe")
        );
    }
    let css: String = doc.descendants().filter(|n| n.has_tag_name("style")).filter_map(|n| n.text()).collect();
    assert!(!css.contains("@import") && !css.contains("url("), "CSS fetches nothing");
    assert!(css.contains("@media print") && css.contains("@media (max-width"), "print and phone rules");
    assert!(!page.contains("https://"), "no https URL anywhere");
    assert_eq!(
        page.matches("http://").count(),
        page.matches("xmlns=\"http://www.w3.org/2000/svg\"").count(),
        "the only http:// is the SVG namespace"
    );
    assert!(doc.descendants().any(|n| n.has_tag_name("meta") && n.attribute("name") == Some("viewport")));

    // internal links resolve
    let all_ids: Vec<&str> = doc.descendants().filter_map(|n| n.attribute("id")).collect();
    for n in doc.descendants().filter(|n| n.has_tag_name("a")) {
        let target = n.attribute("href").expect("href").trim_start_matches('#');
        assert!(all_ids.contains(&target), "link to missing #{target}");
    }

    // every chart of every analysis is inline, plus one triangulation chart per multi-method question
    let planned: usize =
        input.analyses.iter().map(|a| charts::charts_for(&a.result, &a.draws, &a.figures, &a.stem).len()).sum();
    let svgs = doc.descendants().filter(|n| n.has_tag_name("svg")).count();
    // each chart twice (a desktop and a phone drawing)
    assert_eq!(svgs, 2 * (planned + 1), "inline SVG charts");
    let narrow =
        doc.descendants().filter(|n| n.has_tag_name("svg") && n.attribute("class") == Some("chart narrow")).count();
    assert_eq!(narrow, planned + 1, "a phone drawing of every chart");
    for f in doc.descendants().filter(|n| n.has_tag_name("figure")) {
        assert!(f.descendants().any(|n| n.has_tag_name("figcaption")), "each figure has its caption");
    }

    // the words and numbers
    let text: String = doc.descendants().filter(|n| n.is_text()).filter_map(|n| n.text()).collect();
    for a in &input.analyses {
        assert!(text.contains(&a.label), "label {}", a.label);
        for s in &a.result.assumptions {
            assert!(text.contains(s.as_str()), "assumption '{s}'");
        }
        for w in &a.result.warnings {
            assert!(text.contains(w.as_str()), "warning '{w}'");
        }
        for i in &a.result.inputs {
            assert!(text.contains(&i.sha256), "hash of {}", i.path);
        }
        // an effect states its verdict; an evaluation of methods states what its numbers are
        if aftercast_report::numbers::kind(&a.result) == aftercast_report::numbers::Kind::Effect {
            assert!(text.contains(a.result.verdict.sentence()));
        } else {
            assert!(text.contains(&aftercast_report::numbers::headline(&a.result)));
        }
    }
    assert!(text.contains(aftercast_report::CAUTION));
    assert!(text.contains("weaker") || text.contains("stronger evidence"), "observational caution");
    assert!(text.contains("aftercast run study.toml --out report"), "the command");
    assert!(text.contains("[[analysis]]"), "the study file");
    assert!(text.contains("+3.52%"), "the forecast's relative effect in words");
    assert!(text.contains("Average effect per treated unit: +61.0"), "unit-level wording for match");
    assert!(text.contains("Effect relative to the counterfactual: +3.52%"), "the judged quantity leads");
    assert!(text.contains("'spend_pre' is still imbalanced"), "derived plain-language warning");
    assert!(text.contains("'naive difference' on pool misses the experimental answer"));
    assert!(text.contains("2 methods answer it"), "the triangulated question");
}

#[test]
fn labels_are_escaped() {
    let mut input = study();
    input.title = "<script>alert(1)</script> & \"quotes\"".into();
    let page = html::render(&input);
    assert!(!page.contains("<script>"));
    let doc = parse(&page).expect("parses");
    let title = doc.descendants().find(|n| n.has_tag_name("title")).and_then(|n| n.text()).expect("title");
    assert_eq!(title, input.title);
}

#[test]
fn an_empty_report_still_has_every_section() {
    let input = ReportInput {
        title: "Empty".into(),
        question: "Nothing yet?".into(),
        analyses: vec![],
        tables: vec![],
        command: "aftercast run s.toml --out o".into(),
        study_file: None,
    };
    let page = html::render(&input);
    let doc = parse(&page).expect("parses");
    let ids: Vec<&str> =
        doc.descendants().filter(|n| n.has_tag_name("section")).filter_map(|n| n.attribute("id")).collect();
    assert_eq!(ids, ["answers", "triangulation", "data", "appendix", "caution", "reproduce"]);
}

#[test]
fn the_report_is_written_atomically() {
    let tmp = tempfile::tempdir().expect("tempdir");
    let p = tmp.path().join("out").join("report.html");
    html::write(&study(), &p).expect("write");
    let text = std::fs::read_to_string(&p).expect("read");
    parse(&text).expect("parses");
    assert_eq!(std::fs::read_dir(p.parent().expect("dir")).expect("dir").count(), 1, "no temporary file left");
}

fn with(mean: f64, sd: f64, verdict: Verdict) -> ReportAnalysis {
    let mut r = common::forecast();
    r.effect.relative = Some(common::summary(mean, sd));
    r.verdict = verdict;
    analysis(&format!("m{mean}"), "x", Some("q"), r)
}

#[test]
fn triangulation_follows_the_documented_rule() {
    // overlapping intervals, same verdict
    let (a, b) = (with(0.035, 0.005, Verdict::Gain), with(0.03, 0.007, Verdict::Gain));
    let t = html::triangulate("q", &[&a, &b]);
    assert_eq!(t.quantity, Quantity::Relative);
    assert_eq!(t.agreement, Agreement::Agree);
    let (lo, hi) = t.common.expect("common range");
    // common range = [max lower, min upper] of the 90% equal-tailed intervals
    let z = 1.6448536269514722;
    assert!((lo - (0.035 - z * 0.005)).abs() < 1e-12 && (hi - (0.03 + z * 0.007)).abs() < 1e-12);
    // overlapping, different verdicts in the same direction or none
    let c = with(0.02, 0.008, Verdict::Inconclusive);
    assert_eq!(html::triangulate("q", &[&a, &c]).agreement, Agreement::Compatible);
    // disjoint intervals
    let d = with(-0.05, 0.005, Verdict::Loss);
    let t = html::triangulate("q", &[&a, &b, &d]);
    assert_eq!(t.agreement, Agreement::Disagree);
    assert!(t.common.is_none());
    assert_eq!(t.disjoint_pairs.len(), 2);
    // overlapping intervals but a gain against a loss
    let e = with(0.02, 0.02, Verdict::LossButSmall);
    let t = html::triangulate("q", &[&a, &e]);
    assert!(t.common.is_some() && t.opposite_directions);
    assert_eq!(t.agreement, Agreement::Disagree);
    // a NaN interval cannot be judged
    let f = with(f64::NAN, 0.01, Verdict::Inconclusive);
    assert_eq!(html::triangulate("q", &[&a, &f]).agreement, Agreement::Undetermined);
    // without a relative effect everywhere the average effect is compared
    let mut g = with(0.03, 0.01, Verdict::Gain);
    g.result.effect.relative = None;
    assert_eq!(html::triangulate("q", &[&a, &g]).quantity, Quantity::Average);
}

/// The layout check of a phone (scripts/check-report-layout.sh: no sideways scroll, tables in
/// scrolling wrappers, no row taller than 200 px, chart text at 10 px or more at 390 px), run on
/// the fixture report when headless Chromium and python3 are installed; skipped otherwise.
#[test]
fn the_report_reads_on_a_phone_when_chromium_is_present() {
    let have = |p: &str| {
        std::process::Command::new("sh")
            .arg("-c")
            .arg(format!("command -v {p}"))
            .output()
            .is_ok_and(|o| o.status.success())
    };
    let script = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("../../scripts/check-report-layout.sh");
    if !(have("chromium") && have("python3") && script.exists()) {
        eprintln!("skipped: chromium, python3 or the script is missing");
        return;
    }
    let tmp = tempfile::tempdir().expect("tempdir");
    let page = tmp.path().join("report.html");
    html::write(&study(), &page).expect("write");
    let out = std::process::Command::new("bash").arg(&script).arg(&page).arg("390").output().expect("run the check");
    let text = format!("{}{}", String::from_utf8_lossy(&out.stdout), String::from_utf8_lossy(&out.stderr));
    match out.status.code() {
        Some(0) => {}
        Some(2) => eprintln!("skipped: the layout check could not run: {text}"),
        _ => panic!("the report does not read on a phone:\n{text}"),
    }
}
