//! The self-contained HTML report: one file with inline CSS and inline SVG charts, no external
//! requests, readable on a phone and in print. The markup is XHTML-compatible (every element
//! closed, attributes quoted) so that it parses as XML as well as HTML5.
//!
//! Sections, in order (each a `<section id=...>`): `answers` (one card per question of the
//! study, then one per analysis that answers none: the answer in the outcome's units, one
//! interval, the verdict, whether independent methods agree, fragility flags and the known truth
//! where the study gives one), `triangulation`, one `analysis-<stem>` per analysis, `data`,
//! `appendix` (diagnostics as tables and sentences), `caution`, `reproduce`.

use crate::charts::{self, EstimateBar, theme::ValueFormat};
use crate::numbers::{self, point_and_interval};
use crate::{CAUTION, ReportError, Table, write_atomic};
use aftercast_core::estimate::{Figures, KeptDraws};
use aftercast_core::result::{AnalysisResult, Summary, Verdict};
use serde_json::Value;
use std::fmt::Write as _;
use std::path::Path;

/// One analysis of a report.
#[derive(Debug, Clone)]
pub struct ReportAnalysis {
    /// Heading, e.g. "Forecast of weekly active users (structural model)".
    pub label: String,
    /// Key of the question it answers; analyses sharing a key are triangulated.
    pub question: Option<String>,
    /// Its result document.
    pub result: AnalysisResult,
    /// The kept draws of its summaries (the distribution charts draw them).
    pub draws: KeptDraws,
    /// Typed figure data (placebo gaps, propensity histogram, sensitivity, power grid).
    pub figures: Figures,
    /// The verb's own tables (also printed in the terminal).
    pub tables: Vec<Table>,
    /// Short identifier: chart file stem and section id (letters, digits, `-`, `_`).
    pub stem: String,
    /// The true effect, where the study knows it (invented data): shown beside the estimate.
    pub truth: Option<KnownTruth>,
}

/// A true effect the study states (`truth`, `truth_of` of an analysis).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct KnownTruth {
    /// The value: a fraction for the relative effect, outcome units otherwise.
    pub value: f64,
    /// Which effect it is the truth of.
    pub of: TruthOf,
}

/// The effect a known truth is stated for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TruthOf {
    /// Relative to the counterfactual.
    Relative,
    /// The average effect (per period or per unit, as the analysis reports it).
    Average,
    /// The total over the post-period.
    Cumulative,
}

impl TruthOf {
    /// Read the study's `truth_of` word (relative, average, cumulative).
    pub fn parse(word: &str) -> Option<TruthOf> {
        match word {
            "relative" => Some(TruthOf::Relative),
            "average" => Some(TruthOf::Average),
            "cumulative" => Some(TruthOf::Cumulative),
            _ => None,
        }
    }
}

impl KnownTruth {
    /// The analysis's summary of the same quantity, if it reports it.
    pub fn summary_of(&self, r: &AnalysisResult) -> Option<Summary> {
        match self.of {
            TruthOf::Relative => r.effect.relative,
            TruthOf::Average => Some(r.effect.average),
            TruthOf::Cumulative => r.effect.cumulative,
        }
    }

    /// The truth as written: a percentage or a number with the outcome's unit.
    pub fn text(&self, r: &AnalysisResult) -> String {
        match self.of {
            TruthOf::Relative => numbers::percent(self.value),
            _ => numbers::with_unit(
                &numbers::signed(self.value, numbers::decimals_for(&[self.value])),
                r.outcome_unit.as_deref(),
            ),
        }
    }
}

/// The family of methods an analysis belongs to: agreement within one family (two forecast
/// models) shares its assumptions; agreement across families is the independent check.
pub fn family(r: &AnalysisResult) -> &'static str {
    match r.verb.as_str() {
        "forecast" => "forecast",
        "synthetic" => "synthetic control",
        "match" => "propensity score",
        "compare" => "experiment comparison",
        "rollout" if r.method == "sdid" => "synthetic control",
        "rollout" => "difference in differences",
        "plan" => "plan",
        _ => "other",
    }
}

/// The study file a run was made from.
#[derive(Debug, Clone)]
pub struct StudyFile {
    /// Its path as given on the command line.
    pub path: String,
    /// Its text.
    pub contents: String,
}

/// A table a run built for its analyses (an event log turned into per-unit metric windows).
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct TableStep {
    /// The step's name in the study.
    pub name: String,
    /// Its description.
    pub describe: Option<String>,
    /// The command that rebuilds the table alone.
    pub command: String,
    /// The file written (its name inside the output folder's tables).
    pub output: String,
    /// Data rows.
    pub rows: usize,
    /// Column names.
    pub columns: Vec<String>,
}

/// Everything the report shows.
#[derive(Debug, Clone)]
pub struct ReportInput {
    /// Title of the page.
    pub title: String,
    /// The question in the analyst's words.
    pub question: String,
    /// The analyses, in the order they are shown.
    pub analyses: Vec<ReportAnalysis>,
    /// Tables the run built before its analyses (shown with the data).
    pub tables: Vec<TableStep>,
    /// The exact command that reproduces the report.
    pub command: String,
    /// The study file, when the run came from one.
    pub study_file: Option<StudyFile>,
}

/// How the estimates of several methods relate (see docs/report.md for the definitions).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Agreement {
    /// All intervals share a common range and all verdict words are the same.
    Agree,
    /// All intervals share a common range, the verdict words differ, but none says "up"
    /// (gain, gain-but-small) while another says "down" (loss, loss-but-small).
    Compatible,
    /// No range is common to all intervals, or one verdict says up and another down.
    Disagree,
    /// Fewer than two finite intervals: nothing to compare.
    Undetermined,
}

impl Agreement {
    /// The word as printed.
    pub fn word(self) -> &'static str {
        match self {
            Agreement::Agree => "agree",
            Agreement::Compatible => "compatible",
            Agreement::Disagree => "disagree",
            Agreement::Undetermined => "undetermined",
        }
    }
}

/// Which effect the methods are compared on.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Quantity {
    /// The relative effect (every analysis has one): comparable across series and unit methods.
    Relative,
    /// The average effect in outcome units (per period or per unit).
    Average,
}

/// The comparison of the analyses that answer one question.
#[derive(Debug, Clone)]
pub struct Triangulation {
    /// The question key.
    pub question: String,
    /// The quantity compared.
    pub quantity: Quantity,
    /// (label, summary, verdict) per analysis.
    pub rows: Vec<(String, Summary, Verdict)>,
    /// The range common to all intervals, if any.
    pub common: Option<(f64, f64)>,
    /// Pairs of labels whose intervals do not overlap.
    pub disjoint_pairs: Vec<(String, String)>,
    /// Whether one verdict says up and another down.
    pub opposite_directions: bool,
    /// The resulting word.
    pub agreement: Agreement,
    /// The distinct method families among the analyses, in order of appearance.
    pub families: Vec<&'static str>,
}

impl Triangulation {
    /// One sentence on what the agreement is worth: across independent families, or within one.
    pub fn families_sentence(&self) -> String {
        match self.families.len() {
            0 => String::new(),
            1 => format!(
                "All {} methods are of one family ({}): they share its assumptions, so their agreement is not an independent check; answer the question with a second family (forecast, synthetic control, propensity score or difference in differences) as well.",
                self.rows.len(),
                self.families[0]
            ),
            n => format!("{n} independent method families answer it ({}).", self.families.join(", ")),
        }
    }
}

fn direction(v: Verdict) -> i8 {
    match v {
        Verdict::Gain | Verdict::GainButSmall => 1,
        Verdict::Loss | Verdict::LossButSmall => -1,
        _ => 0,
    }
}

/// A method's short name in comparisons: its method and family ("sdid, synthetic control").
fn short_label(a: &ReportAnalysis) -> String {
    format!("{} ({})", method_label(&a.result), family(&a.result))
}

/// The method of an analysis as a reader tells it apart: with segments, "aipw by age_band".
pub fn method_label(r: &AnalysisResult) -> String {
    if !r.breakdowns.iter().any(|b| b.by == "segment") {
        return r.method.clone();
    }
    match r.diagnostics.get("by").and_then(Value::as_str) {
        Some(by) => format!("{} by {by}", r.method),
        None => format!("{} by segment", r.method),
    }
}

/// Compare the analyses that answer one question (see [`Agreement`] for the rule).
pub fn triangulate(question: &str, analyses: &[&ReportAnalysis]) -> Triangulation {
    let quantity = if !analyses.is_empty() && analyses.iter().all(|a| a.result.effect.relative.is_some()) {
        Quantity::Relative
    } else {
        Quantity::Average
    };
    let rows: Vec<(String, Summary, Verdict)> = analyses
        .iter()
        .map(|a| {
            let s = match quantity {
                Quantity::Relative => a.result.effect.relative.unwrap_or(a.result.effect.average),
                Quantity::Average => a.result.effect.average,
            };
            (short_label(a), s, a.result.verdict)
        })
        .collect();
    let finite: Vec<&(String, Summary, Verdict)> = rows
        .iter()
        .filter(|(_, s, _)| s.hdi_lower.is_finite() && s.hdi_upper.is_finite() && s.hdi_lower <= s.hdi_upper)
        .collect();
    let opposite_directions = rows.iter().any(|r| direction(r.2) == 1) && rows.iter().any(|r| direction(r.2) == -1);
    let mut disjoint_pairs = Vec::new();
    for (i, a) in finite.iter().enumerate() {
        for b in &finite[i + 1..] {
            if a.1.hdi_upper < b.1.hdi_lower || b.1.hdi_upper < a.1.hdi_lower {
                disjoint_pairs.push((a.0.clone(), b.0.clone()));
            }
        }
    }
    let common = if finite.len() >= 2 && finite.len() == rows.len() {
        let lo = finite.iter().map(|r| r.1.hdi_lower).fold(f64::NEG_INFINITY, f64::max);
        let hi = finite.iter().map(|r| r.1.hdi_upper).fold(f64::INFINITY, f64::min);
        (lo <= hi).then_some((lo, hi))
    } else {
        None
    };
    let agreement = if finite.len() < 2 || finite.len() < rows.len() {
        Agreement::Undetermined
    } else if common.is_none() || opposite_directions {
        Agreement::Disagree
    } else if rows.iter().all(|r| r.2 == rows[0].2) {
        Agreement::Agree
    } else {
        Agreement::Compatible
    };
    let mut families: Vec<&'static str> = Vec::new();
    for a in analyses {
        let f = family(&a.result);
        if !families.contains(&f) {
            families.push(f);
        }
    }
    Triangulation {
        families,
        question: question.to_string(),
        quantity,
        rows,
        common,
        disjoint_pairs,
        opposite_directions,
        agreement,
    }
}

/// Escape text for HTML/XML content and attribute values.
pub fn escape(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c if (c as u32) < 0x20 && c != '\n' && c != '\t' && c != '\r' => {}
            c => out.push(c),
        }
    }
    out
}

fn id_of(stem: &str) -> String {
    let s: String =
        stem.chars().map(|c| if c.is_ascii_alphanumeric() || c == '-' || c == '_' { c } else { '-' }).collect();
    if s.is_empty() { "analysis".into() } else { s }
}

const CSS: &str = r#"
:root{--paper:#fbf9f4;--ink:#1b2430;--muted:#68707a;--grid:#e2ddd3;--tint:#f2ece0;--clay:#c4543a;--teal:#227a60;--slate:#3a5882;--ochre:#cd9628;--brick:#a8343c}
*{box-sizing:border-box}
html{-webkit-text-size-adjust:100%}
body{margin:0;background:var(--paper);color:var(--ink);font-family:"DejaVu Sans",Verdana,"Segoe UI",system-ui,sans-serif;font-size:16px;line-height:1.55}
.page{max-width:1080px;margin:0 auto;padding:0 20px 48px}
.masthead{border-bottom:3px solid var(--ink);padding:28px 0 14px;margin-bottom:8px}
.brand{font-size:13px;letter-spacing:.18em;text-transform:uppercase;color:var(--muted);margin:0}
.brand b{color:var(--ochre)}
h1{font-size:30px;line-height:1.2;margin:6px 0 8px}
h2{font-size:22px;margin:36px 0 10px;padding-left:12px;border-left:5px solid var(--ochre)}
h3{font-size:17px;margin:22px 0 8px}
.lede{font-size:18px;color:var(--ink);margin:4px 0}
nav.toc{display:flex;flex-wrap:wrap;gap:6px 14px;font-size:14px;padding:10px 0;border-bottom:1px solid var(--grid)}
nav.toc a{color:var(--slate);text-decoration:none}
nav.toc a:hover{text-decoration:underline}
.cards{display:grid;grid-template-columns:repeat(auto-fit,minmax(min(100%,300px),1fr));gap:12px;margin:14px 0}
.card{background:#fff;border:1px solid var(--grid);border-radius:6px;padding:12px 14px}
.card h3{margin:0 0 6px;font-size:15px}
.card h3 a{color:var(--ink);text-decoration:none;border-bottom:2px solid var(--ochre)}
.card p{margin:4px 0;font-size:14px}
.chip{display:inline-block;font-size:13px;font-weight:bold;letter-spacing:.04em;padding:2px 10px;border-radius:999px;border:1px solid currentColor}
.v-gain{color:var(--teal)}.v-gain-but-small{color:#4f8a4a}.v-negligible{color:var(--slate)}.v-loss-but-small{color:#b0623a}.v-loss{color:var(--brick)}.v-inconclusive{color:var(--muted)}
.a-agree{color:var(--teal)}.a-compatible{color:var(--slate)}.a-disagree{color:var(--brick)}.a-undetermined{color:var(--muted)}
.verdict{background:#fff;border:1px solid var(--grid);border-left:6px solid var(--ink);border-radius:4px;padding:12px 16px;margin:12px 0}
.verdict p{margin:6px 0}
.verdict .words{font-size:18px;font-weight:bold}
.table-wrap{overflow-x:auto;margin:10px 0}
table{border-collapse:collapse;width:100%;font-size:14px;background:#fff}
th,td{text-align:left;padding:6px 10px;border-bottom:1px solid var(--grid);vertical-align:top}
th{font-size:12px;text-transform:uppercase;letter-spacing:.06em;color:var(--muted);background:var(--tint)}
td.num{text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap}
code,pre,.hash{font-family:"DejaVu Sans Mono",Menlo,Consolas,monospace;font-size:13px}
.hash{white-space:nowrap}
pre{background:#fff;border:1px solid var(--grid);border-radius:4px;padding:10px 12px;overflow-x:auto;white-space:pre-wrap;word-break:break-word}
figure{margin:14px 0;background:#fff;border:1px solid var(--grid);border-radius:6px;padding:12px}
figure h4{margin:0 0 2px;font-size:16px}
figcaption{font-size:14px;color:var(--muted);margin:0 0 6px}
figure svg{display:block;width:100%;height:auto}
svg.chart text{font-family:"DejaVu Sans",Verdana,sans-serif}
.figs{display:grid;grid-template-columns:repeat(auto-fit,minmax(min(100%,440px),1fr));gap:14px}
.figs figure{margin:0}
.warnings{list-style:none;padding:0;margin:8px 0}
.warnings li{background:#fbefe9;border-left:5px solid var(--brick);padding:8px 12px;margin:6px 0;border-radius:3px}
.ok{color:var(--teal)}
.answers{display:grid;grid-template-columns:repeat(auto-fit,minmax(min(100%,480px),1fr));gap:14px;margin:14px 0}
.answer{background:#fff;border:1px solid var(--grid);border-top:5px solid var(--ink);border-radius:6px;padding:12px 16px;min-width:0}
.answer h3{margin:0 0 8px;font-size:17px}
.answer .lead{margin:4px 0;line-height:1.9}
.answer .big{font-size:28px;font-weight:bold;font-variant-numeric:tabular-nums;white-space:nowrap}
.answer .big2{font-size:20px;font-weight:bold;white-space:nowrap}
.answer .what{color:var(--muted);font-size:14px}
.answer .range,.answer .truth,.answer .agree,.answer .more,.answer .lead-text,.answer .flagline,.answer .ok{margin:6px 0;font-size:14px}
.answer table.mini{font-size:13px}
.answer table.mini .fam{font-size:12px;color:var(--muted)}
.truth{color:#7a5a12;background:#fbf3df;border-left:4px solid var(--ochre);padding:4px 8px}
.flags{margin:6px 0;padding-left:18px;font-size:14px;color:var(--brick)}
.flagline{color:var(--brick)}
.meta{font-size:14px;color:var(--muted)}
figure svg.narrow{display:none}
td .chip{font-size:12px;padding:1px 8px}
.rests li{margin:4px 0}
.caution{background:var(--tint);border:1px dashed var(--ochre);padding:10px 14px;border-radius:4px}
dl.diag{display:grid;grid-template-columns:minmax(140px,max-content) 1fr;gap:4px 16px;font-size:14px;margin:8px 0}
dl.diag dt{color:var(--muted)}
dl.diag dd{margin:0;word-break:break-word}
details{font-size:14px;margin:4px 0}
details pre{max-height:320px;overflow:auto}
footer{margin-top:40px;padding-top:10px;border-top:1px solid var(--grid);font-size:13px;color:var(--muted)}
@media (max-width:640px){
 body{font-size:15px}
 .page{padding:0 12px 32px}
 h1{font-size:24px}
 h2{font-size:19px}
 dl.diag{grid-template-columns:1fr}
 dl.diag dd{margin-bottom:6px}
 figure{padding:8px}
 figure svg.wide{display:none}
 figure svg.narrow{display:block}
 .answer .big{font-size:24px}
 th,td{padding:5px 7px}
}
@media print{
 @page{margin:14mm}
 body{background:#fff;font-size:11pt}
 .page{max-width:none;padding:0}
 nav.toc{display:none}
 h2{break-after:avoid}
 figure,table,.verdict,.card{break-inside:avoid;background:#fff}
 .figs{display:block}
 figure svg.narrow{display:none}
 figure svg.wide{display:block}
 .figs figure{margin:10px 0}
 details>*{display:block}
 pre{white-space:pre-wrap}
 .chip{border-width:2px}
}
"#;

fn verdict_chip(v: Verdict) -> String {
    format!("<span class=\"chip v-{w}\">{w}</span>", w = v.word())
}

fn table_html(out: &mut String, t: &Table) {
    let _ = writeln!(out, "<h3>{}</h3><div class=\"table-wrap\"><table><thead><tr>", escape(&t.title));
    for h in &t.headers {
        let _ = write!(out, "<th>{}</th>", escape(h.trim()));
    }
    out.push_str("</tr></thead><tbody>\n");
    for row in &t.rows {
        out.push_str("<tr>");
        for (k, c) in row.iter().enumerate() {
            let class = if k == 0 { "" } else { " class=\"num\"" };
            let _ = write!(out, "<td{class}>{}</td>", escape(c.trim()));
        }
        out.push_str("</tr>\n");
    }
    out.push_str("</tbody></table></div>\n");
    if let Some(n) = &t.note {
        let _ = writeln!(out, "<p class=\"note\">{}</p>", escape(n));
    }
}

/// The verdict and the numbers in words (the same rows, points and intervals as the terminal).
fn verdict_words(r: &AnalysisResult) -> String {
    let lines = numbers::effect_lines(r);
    if lines.iter().all(|l| !l.summary.estimate.is_finite()) {
        return "The effect could not be estimated: its summary is not a number. See the warnings and diagnostics."
            .into();
    }
    let hdi = numbers::interval_name(r.level);
    let mut s = numbers::lead_sentence(r);
    // the lead sentence already gives the judged row and the one in the other scale
    let led = if numbers::judged_line(r).percent { numbers::units_line(r).label } else { String::new() };
    for l in lines.iter().filter(|l| !l.judged && !l.percent && l.label != led && l.summary.estimate.is_finite()) {
        let (p, i) = numbers::line_numbers(r, l);
        let _ = write!(s, " {}: {p} ({hdi} {i}).", numbers::effect_words(&l.label));
    }
    let avg = &r.effect.average;
    if avg.prob_positive.is_finite() {
        let _ = write!(s, " The chance that the effect is above zero is {:.0}%.", avg.prob_positive * 100.0);
    }
    if let (Some(p), Some(t)) = (avg.prob_above_threshold.filter(|p| p.is_finite()), r.threshold) {
        let _ = write!(
            s,
            " The chance that the average effect exceeds {} is {:.0}%.",
            numbers::signed(t, numbers::decimals_for(&[t])),
            p * 100.0
        );
    }
    let _ = write!(s, " Effects from {} are treated as too small to matter (the ROPE).", crate::rope_words(r));
    s
}

/// The share of pre-period observations outside the model's band, when it is far above what the
/// level allows (more than twice the expected share plus two points): (share, expected).
fn poor_pre_band(r: &AnalysisResult) -> Option<(f64, f64)> {
    let path = r.path.as_ref()?;
    let pre: Vec<_> =
        path.iter().filter(|p| !p.post && p.observed.is_some_and(f64::is_finite) && p.upper > p.lower).collect();
    if pre.len() < 10 {
        return None;
    }
    let outside = pre.iter().filter(|p| p.observed.is_some_and(|o| o < p.lower || o > p.upper)).count();
    let share = outside as f64 / pre.len() as f64;
    let expected = 1.0 - r.level;
    (share > 2.0 * expected + 0.02).then_some((share, expected))
}

fn diag_f64(r: &AnalysisResult, path: &[&str]) -> Option<f64> {
    let mut v = r.diagnostics.get(path[0])?;
    for k in &path[1..] {
        v = v.get(k)?;
    }
    v.as_f64().filter(|x| x.is_finite())
}

/// Reasons a result could be overturned, each one short sentence (shown on the answer card and
/// above the details): hidden bias (Rosenbaum Gamma below 1.5), a poor fit before the change,
/// an effect not unusual among placebos, correlated forecast errors, covariates still
/// imbalanced, treated units left out.
pub fn fragility(r: &AnalysisResult) -> Vec<String> {
    let mut f = Vec::new();
    if let Some(g) = diag_f64(r, &["rosenbaum", "gamma_critical"]).filter(|g| *g < 1.5) {
        f.push(format!(
            "Fragile to hidden bias: an unmeasured factor that changes the odds of treatment by a factor of {g:.2} would make the effect indistinguishable from zero (flagged below 1.5)."
        ));
    }
    if let Some((share, expected)) = poor_pre_band(r) {
        f.push(format!(
            "Poor fit before the change: {:.0}% of pre-period observations fall outside the model's band (about {:.0}% expected).",
            share * 100.0,
            expected * 100.0
        ));
    }
    if let Some(r2) = diag_f64(r, &["r2_pre"]).filter(|v| *v < 0.8) {
        f.push(format!(
            "Poor fit before the change: the synthetic control explains {:.0}% of the treated series' variation before the start (flagged below 80%, a rule of thumb of this report).",
            r2 * 100.0
        ));
    }
    if let Some(p) = r.placebo.as_ref().filter(|p| p.p_value > 1.0 - r.level) {
        f.push(format!(
            "Not unusual among placebos: p = {:.2}, above the {:.2} the interval level allows; an effect this large also appears where nothing happened.",
            p.p_value,
            1.0 - r.level
        ));
    }
    if let Some(p) = diag_f64(r, &["ljung_box", "p_value"]).filter(|p| *p < 0.05) {
        f.push(format!(
            "Correlated forecast errors before the change (Ljung-Box p {}): the interval may be too narrow.",
            if p < 0.001 { "< 0.001".to_string() } else { format!("= {p:.3}") }
        ));
    }
    for b in &r.breakdowns {
        let Some(t) = b.test.as_ref().filter(|t| t.p_value < 0.05) else { continue };
        match b.by.as_str() {
            "event-time" => f.push(format!(
                "Trends differ before adoption: the periods before adoption are jointly away from zero (p = {:.3}); parallel trends is in doubt.",
                t.p_value
            )),
            "placebo-date" => f.push(format!(
                "Fake adoption dates show effects (p = {:.3}): the comparison may drift even where nothing happened (with few units such a check fires by chance in about one run in ten; see the fake-date chart).",
                t.p_value
            )),
            _ => {}
        }
    }
    if r.verb == "rollout" && r.method == "twfe" {
        f.push("Two-way fixed-effects baseline: biased when effects differ by wave or grow over time; read the group-time or imputation answer.".into());
    }
    if let Some(b) = &r.balance {
        let bad: Vec<&str> = b.iter().filter(|x| x.smd_after.abs() > 0.1).map(|x| x.covariate.as_str()).collect();
        if !bad.is_empty() {
            f.push(format!("Still imbalanced after adjustment (|SMD| above 0.1): {}.", bad.join(", ")));
        }
    }
    f
}

/// Plain-language warnings derived from the result itself, beside the estimator's own.
fn derived_warnings(r: &AnalysisResult) -> Vec<String> {
    let mut w = Vec::new();
    let avg = &r.effect.average;
    if [avg.mean, avg.lower, avg.upper].iter().any(|v| !v.is_finite()) {
        w.push("The effect summary contains values that are not numbers; treat this analysis as failed and look at the warnings above for the cause.".into());
    }
    if r.verdict == Verdict::Inconclusive {
        w.push("The interval includes both no effect and effects large enough to matter: the data cannot settle the question yet: wait for more data after the change (`aftercast plan` says how long) or narrow the question.".into());
    }
    if let Some((share, expected)) = poor_pre_band(r) {
        w.push(format!(
            "Before the change, {:.0}% of the observations fell outside the model's {:.0}% band (about {:.0}% expected): the model fits the past poorly and the band may be too narrow; compare a second model or method before trusting the interval.",
            share * 100.0,
            r.level * 100.0,
            expected * 100.0
        ));
    }
    if let Some(path) = &r.path
        && path.iter().all(|p| !p.post)
    {
        w.push("The path has no period after the change, so there is no effect to estimate: check --start and --end against the data's last date.".into());
    }

    if let Some(b) = &r.balance {
        for row in b.iter().filter(|x| x.smd_after.abs() > 0.1) {
            w.push(format!(
                "'{}' is still imbalanced after adjustment (|SMD| = {:.2}, above the 0.1 commonly used as the limit), so the estimate may still carry that difference: add a squared term or an interaction of it to the propensity model (--terms) or use a doubly robust method (--method aipw).",
                row.covariate,
                row.smd_after.abs()
            ));
        }
    }
    if let Some(p) = &r.placebo
        && p.p_value > 0.1
    {
        w.push(format!(
            "The treated unit's gap is not unusual among the placebo units (rank {} of {}, p = {:.2}): an effect of this size also appears where nothing happened, so treat the effect as unproven: check the pre-period fit and whether the donors were touched by the change.",
            p.rank, p.units, p.p_value
        ));
    }
    if let Some(s) = &r.sample
        && s.treated_dropped > 0
        && !r.warnings.iter().any(|w| w.contains("left out"))
    {
        w.push(format!(
            "{} of {} treated units were left out (no comparable control); the estimate describes the rest only.",
            s.treated_dropped, s.treated
        ));
    }
    if let Some(est) = &r.estimates {
        for e in est.iter().filter(|e| !e.covers_truth) {
            w.push(format!(
                "'{}' on {} misses the experimental answer: its interval does not contain it (bias {}); on data like these, prefer the methods that cover it.",
                e.method,
                e.setting,
                numbers::signed(e.bias, numbers::decimals_for(&[e.bias]))
            ));
        }
    }
    w
}

fn humanise(key: &str) -> String {
    let s = key.replace(['_', '-'], " ");
    let mut c = s.chars();
    match c.next() {
        Some(f) => f.to_uppercase().collect::<String>() + c.as_str(),
        None => String::new(),
    }
}

fn number_text(f: f64) -> String {
    if !f.is_finite() {
        "n/a".into()
    } else if f.abs() >= 1000.0 {
        numbers::signed(f, 0).trim_start_matches('+').to_string()
    } else if f != 0.0 && f.abs() < 0.001 {
        format!("{f:.3e}")
    } else {
        format!("{}", (f * 1e4).round() / 1e4)
    }
}

fn scalar_text(v: &Value) -> Option<String> {
    match v {
        Value::Null => Some("none".into()),
        Value::Bool(b) => Some(if *b { "yes" } else { "no" }.into()),
        Value::Number(n) => Some(match n.as_f64() {
            Some(f) if n.is_f64() => number_text(f),
            _ => n.to_string(),
        }),
        Value::String(s) => Some(s.clone()),
        _ => None,
    }
}

/// A list of scalars in words: every value when short, the range and count otherwise.
fn list_text(items: &[Value]) -> Option<String> {
    let texts: Option<Vec<String>> = items.iter().map(scalar_text).collect();
    let texts = texts?;
    if texts.len() <= 12 {
        return Some(if texts.is_empty() { "none".into() } else { texts.join(", ") });
    }
    let nums: Vec<f64> = items.iter().filter_map(Value::as_f64).filter(|v| v.is_finite()).collect();
    if nums.len() == items.len() {
        let lo = nums.iter().copied().fold(f64::INFINITY, f64::min);
        let hi = nums.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        return Some(format!("{} values from {} to {}", texts.len(), number_text(lo), number_text(hi)));
    }
    Some(format!("{}, … ({} in all)", texts[..8].join(", "), texts.len()))
}

/// Rows shown of a diagnostic table; the rest are counted and left to result.json.
const DIAG_ROWS: usize = 24;

/// An array of objects as a table (columns: the scalar fields of the rows).
fn diag_table(out: &mut String, title: &str, rows: &[Value]) -> bool {
    let mut cols: Vec<&str> = Vec::new();
    for r in rows.iter().take(50) {
        let Some(o) = r.as_object() else { return false };
        for (k, v) in o {
            if (scalar_text(v).is_some() || v.as_array().is_some_and(|a| a.len() <= 4)) && !cols.contains(&k.as_str()) {
                cols.push(k);
            }
        }
    }
    if cols.is_empty() {
        return false;
    }
    let _ = writeln!(out, "<h4>{}</h4><div class=\"table-wrap\"><table class=\"diag\"><thead><tr>", escape(title));
    for c in &cols {
        let _ = write!(out, "<th>{}</th>", escape(&humanise(c)));
    }
    out.push_str("</tr></thead><tbody>\n");
    for r in rows.iter().take(DIAG_ROWS) {
        out.push_str("<tr>");
        for c in &cols {
            let v = r.get(*c).unwrap_or(&Value::Null);
            let t = scalar_text(v).or_else(|| v.as_array().and_then(|a| list_text(a))).unwrap_or_default();
            let class = if v.is_number() { " class=\"num\"" } else { "" };
            let _ = write!(out, "<td{class}>{}</td>", escape(&t));
        }
        out.push_str("</tr>\n");
    }
    out.push_str("</tbody></table></div>\n");
    if rows.len() > DIAG_ROWS {
        let _ = writeln!(out, "<p class=\"note\">{} more rows in result.json.</p>", rows.len() - DIAG_ROWS);
    }
    true
}

/// Diagnostics as readable definition lists and tables (no raw JSON): scalars as terms, lists
/// in words, arrays of records as tables, nested records under their own heading.
fn diagnostics_html(out: &mut String, map: &serde_json::Map<String, Value>, depth: usize) {
    if map.is_empty() {
        out.push_str("<p>This method reports no diagnostics.</p>\n");
        return;
    }
    let mut dl = String::new();
    let mut nested = String::new();
    for (k, v) in map {
        let key = humanise(k);
        if let Some(t) = scalar_text(v).or_else(|| v.as_array().and_then(|a| list_text(a))) {
            let _ = writeln!(dl, "<dt>{}</dt><dd>{}</dd>", escape(&key), escape(&t));
            continue;
        }
        match v {
            Value::Array(rows) if diag_table(&mut nested, &key, rows) => {}
            Value::Object(o) if depth < 2 => {
                let _ = writeln!(nested, "<h4>{}</h4>", escape(&key));
                diagnostics_html(&mut nested, o, depth + 1);
            }
            Value::Array(a) => {
                let _ = writeln!(dl, "<dt>{}</dt><dd>{} entries (in result.json)</dd>", escape(&key), a.len());
            }
            Value::Object(o) => {
                let _ = writeln!(dl, "<dt>{}</dt><dd>{} fields (in result.json)</dd>", escape(&key), o.len());
            }
            _ => {}
        }
    }
    if !dl.is_empty() {
        let _ = writeln!(out, "<dl class=\"diag\">\n{dl}</dl>");
    }
    out.push_str(&nested);
}

fn effects_table(out: &mut String, r: &AnalysisResult) {
    table_html(out, &crate::effect_table(r));
}

fn verb_tables(out: &mut String, r: &AnalysisResult) {
    if let Some(w) = r.weights.as_ref().filter(|w| !w.is_empty()) {
        let mut w = w.clone();
        w.sort_by(|a, b| b.weight.total_cmp(&a.weight));
        out.push_str("<h3>Donor weights</h3><div class=\"table-wrap\"><table><thead><tr><th>donor</th><th>weight</th></tr></thead><tbody>\n");
        for u in w.iter().filter(|u| u.weight > 0.0005) {
            let _ =
                writeln!(out, "<tr><td>{}</td><td class=\"num\">{:.1}%</td></tr>", escape(&u.unit), u.weight * 100.0);
        }
        let zero = w.iter().filter(|u| u.weight <= 0.0005).count();
        if zero > 0 {
            let _ = writeln!(out, "<tr><td>{zero} donors with no weight</td><td class=\"num\">0%</td></tr>");
        }
        out.push_str("</tbody></table></div>\n");
    }
    if let Some(p) = &r.placebo {
        let pv = numbers::signed(p.p_value, numbers::decimals_for(&[p.p_value])).trim_start_matches('+').to_string();
        if p.rank == 0 {
            // several treated units: one joint test of their mean post/pre fit ratio
            let _ = writeln!(
                out,
                "<p>Placebo test: the treated units' mean post/pre fit ratio against that of random sets of units of the same size ({} units in all): p = {pv}.</p>",
                p.units
            );
        } else {
            let _ = writeln!(
                out,
                "<p>Placebo test: of {} units treated as if they had been treated, the real one ranks {} by its post/pre fit ratio (p = {pv}).</p>",
                p.units, p.rank
            );
        }
    }
    if let Some(s) = &r.sample {
        let _ = writeln!(
            out,
            "<p>Sample: {} treated units, {} controls used, {} treated units left out.</p>",
            s.treated, s.controls_used, s.treated_dropped
        );
    }
    if let Some(b) = r.balance.as_ref().filter(|b| !b.is_empty()) {
        out.push_str("<h3>Balance</h3><div class=\"table-wrap\"><table><thead><tr><th>covariate</th><th>SMD before</th><th>SMD after</th><th>variance ratio after</th></tr></thead><tbody>\n");
        for row in b {
            let _ = writeln!(
                out,
                "<tr><td>{}</td><td class=\"num\">{:.3}</td><td class=\"num\">{:.3}</td><td class=\"num\">{:.2}</td></tr>",
                escape(&row.covariate),
                row.smd_before,
                row.smd_after,
                row.var_ratio_after
            );
        }
        out.push_str("</tbody></table></div>\n");
    }
    if let Some(t) = &r.truth {
        let (p, i) = point_and_interval(t, false);
        let _ = writeln!(
            out,
            "<h3>Against the experiment</h3><p>The randomized experiment's answer: {p} ({} {i}).</p>",
            numbers::interval_name(r.level)
        );
    }
    if let Some(t) = crate::comparison_table(r) {
        table_html(out, &t);
    }
    for t in crate::breakdown_tables(r, usize::MAX, true) {
        table_html(out, &t);
    }
    if let Some(c) = diag_f64(r, &["twfe_decomposition", "coefficient"]) {
        let adopted = diag_f64(r, &["twfe_decomposition", "weight_on_adopted_comparisons"]).unwrap_or(0.0);
        let neg = diag_f64(r, &["twfe_decomposition", "negative_cells"]).unwrap_or(0.0);
        let _ = writeln!(
            out,
            "<p>The familiar two-way fixed-effects regression on the same panel gives {}. {:.0}% of its weight comes from comparing later waves with waves that had already adopted{}; when effects grow with time since adoption, those comparisons pull it away from the effect on the adopters.</p>",
            escape(&numbers::with_unit(&numbers::signed(c, numbers::decimals_for(&[c])), r.outcome_unit.as_deref())),
            adopted * 100.0,
            if neg > 0.0 {
                format!(", and {neg:.0} adopted wave-periods get a negative weight")
            } else {
                String::new()
            }
        );
    }
}

/// Width of the phone drawing of a chart (px): drawn at 360 px and shown about 348 px wide on a
/// 390 px screen, so its smallest text (10.5 px in the SVG) stays above 10 px.
const NARROW: u32 = 360;

fn svg_of(c: &charts::Chart, class: &str) -> String {
    match c.to_svg(false) {
        Ok(svg) => {
            let start = svg.find("<svg").unwrap_or(0);
            svg[start..].replacen(
                "<svg",
                &format!("<svg class=\"chart {class}\" role=\"img\" aria-label=\"{}\"", escape(&c.title)),
                1,
            ) + "\n"
        }
        Err(e) => format!("<p class=\"caution\">This chart could not be drawn: {}</p>\n", escape(&e.to_string())),
    }
}

/// An inline SVG figure, drawn twice: for a desktop and for a phone (the page shows one of them
/// by its width, so chart text stays readable); a drawing failure becomes a visible note.
fn figure(out: &mut String, c: &charts::Chart) {
    let _ = writeln!(out, "<figure id=\"fig-{}\">", id_of(&c.name));
    let _ = writeln!(out, "<h4>{}</h4><figcaption>{}</figcaption>", escape(&c.title), escape(&c.caption));
    out.push_str(&svg_of(c, "wide"));
    let narrow_height = (f64::from(c.height) * 0.8).round().clamp(260.0, 4000.0) as u32;
    let narrow = c.clone().with_size(NARROW, narrow_height.max(c.height.min(4000) * 3 / 4));
    out.push_str(&svg_of(&narrow, "narrow"));
    out.push_str("</figure>\n");
}

fn data_section(out: &mut String, input: &ReportInput) {
    out.push_str("<section id=\"data\">\n<h2>The data</h2>\n");
    let mut seen: Vec<(String, String, usize)> = Vec::new();
    for a in &input.analyses {
        for i in &a.result.inputs {
            if !seen.iter().any(|(p, h, _)| *p == i.path && *h == i.sha256) {
                seen.push((i.path.clone(), i.sha256.clone(), i.rows));
            }
        }
    }
    if seen.is_empty() {
        out.push_str("<p>The results name no input files.</p>\n");
    } else {
        out.push_str("<div class=\"table-wrap\"><table><thead><tr><th>file</th><th>rows</th><th>SHA-256</th></tr></thead><tbody>\n");
        for (p, h, n) in &seen {
            let _ = writeln!(
                out,
                "<tr><td><code>{}</code></td><td class=\"num\">{}</td><td class=\"hash\">{}</td></tr>",
                escape(p),
                aftercast_core::result::count_text(*n),
                escape(h)
            );
        }
        out.push_str("</tbody></table></div>\n<p>The SHA-256 fingerprint changes if a single byte of a file changes: compare it to be sure a rerun reads the same data.</p>\n");
    }
    for t in &input.tables {
        let _ = writeln!(
            out,
            "<h3>Built by the run: {}</h3><p>{} Written to <code>{}</code>: {} rows, columns {}.</p><pre><code>{}</code></pre>",
            escape(&t.name),
            escape(t.describe.as_deref().unwrap_or("A per-unit table built from an event log.")),
            escape(&t.output),
            aftercast_core::result::count_text(t.rows),
            escape(&t.columns.join(", ")),
            escape(&t.command)
        );
    }
    out.push_str(
        "<div class=\"table-wrap\"><table><thead><tr><th>analysis</th><th>periods or units</th></tr></thead><tbody>\n",
    );
    for a in &input.analyses {
        let r = &a.result;
        let desc = if let Some(path) = r.path.as_ref().filter(|p| !p.is_empty()) {
            let pre = path.iter().filter(|p| !p.post).count();
            let post = path.len() - pre;
            let first_post = path.iter().find(|p| p.post).map_or("none".to_string(), |p| p.time.to_string());
            format!(
                "{} periods from {} to {}: {pre} before the change, {post} after (first period after the change: {first_post})",
                path.len(),
                path[0].time,
                path[path.len() - 1].time
            )
        } else if let Some(s) = &r.sample {
            format!(
                "{} treated units, {} controls used, {} treated units left out",
                s.treated, s.controls_used, s.treated_dropped
            )
        } else if r.verb == "rollout" {
            let n = |k: &str| r.diagnostics.get(k).and_then(Value::as_u64).unwrap_or(0);
            let waves = r.diagnostics.get("waves").and_then(Value::as_array).map_or(0, Vec::len);
            format!(
                "{} units over {} periods; {} waves, {} units never adopting; {} adopted unit-periods covered",
                n("units"),
                n("periods"),
                waves,
                n("never_adopted"),
                n("covered_unit_periods")
            )
        } else if let Some(est) = &r.estimates {
            format!("{} observational methods compared with a randomized experiment", est.len())
        } else if let Some(p) = &r.planning {
            let waits: Vec<String> = p.mde.iter().map(|m| m.wait.to_string()).collect();
            format!(
                "{} placebo runs; {} of {} {} checked",
                p.false_positive_rate.placebos,
                if p.wait_unit == "units" { "sizes" } else { "waits" },
                waits.join(", "),
                p.wait_unit
            )
        } else {
            "no period or unit counts in the result".into()
        };
        let _ = writeln!(out, "<tr><td><code>{}</code></td><td>{}</td></tr>", escape(&a.stem), escape(&desc));
    }
    out.push_str("</tbody></table></div>\n</section>\n");
}

/// Warnings of a result, each once: the estimator's own, then those the report derives.
pub fn all_warnings(r: &AnalysisResult) -> Vec<String> {
    let mut warnings: Vec<String> = Vec::new();
    for w in r.warnings.iter().cloned().chain(derived_warnings(r)) {
        if !warnings.contains(&w) {
            warnings.push(w);
        }
    }
    warnings
}

fn analysis_section(out: &mut String, a: &ReportAnalysis) {
    let r = &a.result;
    let _ = writeln!(out, "<section id=\"analysis-{}\" class=\"analysis\">", id_of(&a.stem));
    let _ = writeln!(out, "<h2>{}</h2>", escape(&a.label));
    let est = r.estimand.as_deref().map(|e| format!(", estimand {e}")).unwrap_or_default();
    let _ = writeln!(
        out,
        "<p class=\"meta\">Method: <code>{} {}</code> ({} family){}, seed {}, {:.0}% intervals. <a href=\"#diag-{}\">Diagnostics</a></p>",
        escape(&r.verb),
        escape(&r.method),
        family(r),
        escape(&est),
        r.seed,
        r.level * 100.0,
        id_of(&a.stem)
    );
    if numbers::kind(r) == numbers::Kind::Effect {
        let _ = writeln!(
            out,
            "<div class=\"verdict\"><p class=\"words\">{} {}</p><p>{}</p>",
            verdict_chip(r.verdict),
            escape(r.verdict.sentence()),
            escape(&verdict_words(r))
        );
        if let Some(t) = &a.truth
            && let Some(s) = t.summary_of(r)
        {
            let _ = writeln!(out, "<p class=\"truth\">{}</p>", escape(&truth_sentence(t, &s, r)));
        }
        out.push_str("</div>\n");
        effects_table(out, r);
    } else {
        // an evaluation of methods: no verdict about a change
        let _ = writeln!(out, "<div class=\"verdict\"><p>{}</p></div>", escape(&numbers::headline(r)));
    }
    let flags = fragility(r);
    if !flags.is_empty() {
        out.push_str("<ul class=\"flags\">\n");
        for f in &flags {
            let _ = writeln!(out, "<li>{}</li>", escape(f));
        }
        out.push_str("</ul>\n");
    }
    let charts = charts::charts_for(r, &a.draws, &a.figures, &a.stem);
    let (lead, rest) = charts.split_first().map_or((None, &[][..]), |(f, r)| (Some(f), r));
    if let Some(c) = lead {
        figure(out, c);
    }
    if !rest.is_empty() {
        out.push_str("<div class=\"figs\">\n");
        for c in rest {
            figure(out, c);
        }
        out.push_str("</div>\n");
    }
    verb_tables(out, r);
    for t in &a.tables {
        table_html(out, t);
    }
    out.push_str("<h3>Warnings</h3>\n");
    let warnings = all_warnings(r);
    if warnings.is_empty() {
        out.push_str("<p class=\"ok\">No warnings: the checks this method runs found nothing to flag.</p>\n");
    } else {
        out.push_str("<ul class=\"warnings\">\n");
        for w in &warnings {
            let _ = writeln!(out, "<li>{}</li>", escape(w));
        }
        out.push_str("</ul>\n");
    }
    out.push_str("<h3>What this rests on</h3>\n");
    if r.assumptions.is_empty() {
        out.push_str(
            "<p>The method listed no assumptions; every observational estimate rests on some (see below).</p>\n",
        );
    } else {
        out.push_str("<ul class=\"rests\">\n");
        for s in &r.assumptions {
            let _ = writeln!(out, "<li>{}</li>", escape(s));
        }
        out.push_str("</ul>\n");
    }
    let _ = writeln!(out, "<p class=\"caution\">{}</p>", escape(CAUTION));
    out.push_str("</section>\n");
}

/// "The true effect (known for these invented data): +2.78%; inside the 90% HDI, the estimate
/// is 0.09 points below it."
fn truth_sentence(t: &KnownTruth, s: &Summary, r: &AnalysisResult) -> String {
    let inside = s.hdi_lower <= t.value && t.value <= s.hdi_upper;
    // the truth and the miss in the decimals of the estimate they are read against
    let d = numbers::decimals_for(&[s.estimate, s.hdi_lower, s.hdi_upper]);
    let units = |v: f64| numbers::with_unit(&numbers::signed(v, d), r.outcome_unit.as_deref());
    let (truth, miss) = match t.of {
        TruthOf::Relative => (t.text(r), format!("{} points", numbers::signed((s.estimate - t.value) * 100.0, 2))),
        _ => (units(t.value), units(s.estimate - t.value)),
    };
    format!(
        "True effect (known for these invented data): {truth}; {} the {}; estimate minus truth: {miss}.",
        if inside { "inside" } else { "outside" },
        numbers::interval_name(r.level)
    )
}

/// The analyses grouped as the answer cards show them: one group per question key (in order
/// of first appearance), then one group per analysis that answers no question.
fn answer_groups(input: &ReportInput) -> Vec<(Option<&str>, Vec<&ReportAnalysis>)> {
    let mut groups: Vec<(Option<&str>, Vec<&ReportAnalysis>)> = Vec::new();
    for a in &input.analyses {
        match a.question.as_deref() {
            Some(q) => match groups.iter_mut().find(|g| g.0 == Some(q)) {
                Some(g) => g.1.push(a),
                None => groups.push((Some(q), vec![a])),
            },
            None => groups.push((None, vec![a])),
        }
    }
    // questions first, in order; then the analyses without one
    let (mut q, rest): (Vec<_>, Vec<_>) = groups.into_iter().partition(|g| g.0.is_some());
    q.extend(rest);
    q
}

/// The card of one question: the lead analysis's answer in the outcome's units and relative
/// to the counterfactual with its interval and verdict, every method in a small table with the
/// truth where known, the agreement of the method families, and the fragility flags.
fn question_card(out: &mut String, key: &str, group: &[&ReportAnalysis], index: usize) {
    let lead = group[0];
    let r = &lead.result;
    let _ = writeln!(out, "<article class=\"answer\" id=\"answer-{index}\">\n<h3>{}</h3>", escape(key));
    let judged = numbers::judged_line(r);
    let primary = if judged.percent { numbers::units_line(r) } else { judged.clone() };
    let secondary = if primary.percent { None } else { numbers::effect_lines(r).into_iter().find(|l| l.percent) };
    let (pp, pi) = numbers::line_numbers(r, &primary);
    let mut lead_html = format!(
        "{} <span class=\"big\">{}</span> <span class=\"what\">{}</span>",
        verdict_chip(r.verdict),
        escape(&pp),
        escape(&primary.label)
    );
    let mut range = format!("{} {}", numbers::interval_name(r.level), pi);
    if let Some(sl) = &secondary {
        let (sp, si) = numbers::line_numbers(r, sl);
        let _ = write!(
            lead_html,
            " <span class=\"big2\">{}</span> <span class=\"what\">relative to the counterfactual</span>",
            escape(&sp)
        );
        let _ = write!(range, "; {si} relative");
    }
    let _ = writeln!(out, "<p class=\"lead\">{lead_html}</p>");
    let _ = writeln!(
        out,
        "<p class=\"range\">{} (the verdict is judged on the {} interval). {}</p>",
        escape(&range),
        if judged.percent { "relative" } else { "outcome-unit" },
        escape(r.verdict.sentence())
    );
    if let Some(t) = &lead.truth
        && let Some(s) = t.summary_of(r)
    {
        let _ = writeln!(out, "<p class=\"truth\">{}</p>", escape(&truth_sentence(t, &s, r)));
    }
    if group.len() > 1 {
        let t = triangulate(key, group);
        let pct = t.quantity == Quantity::Relative;
        let truth_col = group.iter().any(|a| a.truth.is_some());
        let _ = write!(
            out,
            "<div class=\"table-wrap\"><table class=\"mini\"><thead><tr><th>method (family)</th><th>{}</th><th>{}</th><th>verdict</th>{}</tr></thead><tbody>",
            if pct { "relative effect" } else { "average effect" },
            numbers::interval_name(r.level),
            if truth_col { "<th>truth inside</th>" } else { "" }
        );
        for a in group {
            let s =
                if pct { a.result.effect.relative.unwrap_or(a.result.effect.average) } else { a.result.effect.average };
            let (p, i) = numbers::summary_numbers(&s, pct, a.result.outcome_unit.as_deref());
            let truth_cell = if truth_col {
                // judged on the quantity the truth is stated for, whichever the table shows
                let inside = a.truth.and_then(|t| {
                    t.summary_of(&a.result)
                        .map(|q| if q.hdi_lower <= t.value && t.value <= q.hdi_upper { "yes" } else { "no" })
                });
                format!("<td>{}</td>", inside.unwrap_or("n/a"))
            } else {
                String::new()
            };
            let _ = writeln!(
                out,
                "<tr><td><a href=\"#analysis-{}\">{}</a><br/><span class=\"fam\">{}</span></td><td class=\"num\">{}</td><td class=\"num\">{}</td><td>{}</td>{truth_cell}</tr>",
                id_of(&a.stem),
                escape(&method_label(&a.result)),
                family(&a.result),
                escape(&p),
                escape(&i),
                verdict_chip(a.result.verdict)
            );
        }
        out.push_str("</tbody></table></div>\n");
        let _ = writeln!(
            out,
            "<p class=\"agree\"><span class=\"chip a-{w}\">methods {w}</span> {}</p>",
            escape(&t.families_sentence()),
            w = t.agreement.word()
        );
    } else {
        let _ = writeln!(
            out,
            "<p class=\"agree\"><span class=\"chip a-undetermined\">one method</span> Only {} ({} family) answers this question; a second, independent method would show whether the answer holds.</p>",
            escape(&r.method),
            family(r)
        );
    }
    let mut flags: Vec<String> = Vec::new();
    for a in group {
        for f in fragility(&a.result) {
            let f = if group.len() > 1 { format!("{}: {f}", method_label(&a.result)) } else { f };
            if !flags.contains(&f) {
                flags.push(f);
            }
        }
    }
    if flags.is_empty() {
        out.push_str("<p class=\"ok\">No fragility flag: hidden-bias, pre-fit, placebo and residual checks pass where they apply.</p>\n");
    } else {
        out.push_str("<ul class=\"flags\">\n");
        for f in &flags {
            let _ = writeln!(out, "<li>{}</li>", escape(f));
        }
        out.push_str("</ul>\n");
    }
    let _ = writeln!(
        out,
        "<p class=\"more\"><a href=\"#analysis-{}\">Details of each method</a></p>\n</article>",
        id_of(&lead.stem)
    );
}

/// The card of an analysis that answers no question: an effect (as a one-method question, its
/// label as the question), a plan (its answer sentence) or a comparison with an experiment (the
/// experiment's answer, how many methods cover it, which reach another verdict).
fn other_card(out: &mut String, a: &ReportAnalysis, index: usize) {
    let r = &a.result;
    match numbers::kind(r) {
        numbers::Kind::Effect => return question_card(out, &a.label, &[a], index),
        _ => {
            let _ = writeln!(out, "<article class=\"answer\" id=\"answer-{index}\">\n<h3>{}</h3>", escape(&a.label));
            let _ = writeln!(out, "<p class=\"lead-text\">{}</p>", escape(&numbers::headline(r)));
        }
    }
    if let Some(est) = &r.estimates {
        let against: Vec<&str> = est.iter().filter(|e| !e.verdict_agrees).map(|e| e.method.as_str()).collect();
        if !against.is_empty() {
            let _ = writeln!(
                out,
                "<p class=\"flagline\">Reach another verdict than the experiment: {}. Without the experiment, these would have misled.</p>",
                escape(&against.join(", "))
            );
        }
    }
    let _ = writeln!(out, "<p class=\"more\"><a href=\"#analysis-{}\">Details</a></p>\n</article>", id_of(&a.stem));
}

fn answers_section(out: &mut String, input: &ReportInput) {
    out.push_str("<section id=\"answers\">\n<h2>The answers</h2>\n");
    if input.analyses.is_empty() {
        out.push_str("<p>This report holds no analyses.</p>\n</section>\n");
        return;
    }
    out.push_str("<div class=\"answers\">\n");
    for (k, (key, group)) in answer_groups(input).iter().enumerate() {
        match key {
            Some(q) => question_card(out, q, group, k),
            None => other_card(out, group[0], k),
        }
    }
    out.push_str("</div>\n<p class=\"caution\">Observational estimates: each rests on assumptions no data can prove (listed with each method below). A randomized test with a holdout is stronger evidence wherever one is possible.</p>\n</section>\n");
}

fn appendix_section(out: &mut String, input: &ReportInput) {
    out.push_str("<section id=\"appendix\">\n<h2>Appendix: diagnostics</h2>\n<p>What each method reports about its own fit, in tables; result.json beside this page holds every value.</p>\n");
    for a in &input.analyses {
        let _ = writeln!(out, "<h3 id=\"diag-{}\">{}</h3>", id_of(&a.stem), escape(&a.label));
        diagnostics_html(out, &a.result.diagnostics, 0);
    }
    out.push_str("</section>\n");
}

fn triangulation_section(out: &mut String, input: &ReportInput) {
    out.push_str("<section id=\"triangulation\">\n<h2>Do the methods agree?</h2>\n");
    let mut keys: Vec<&str> = Vec::new();
    for a in &input.analyses {
        if let Some(q) = a.question.as_deref()
            && !keys.contains(&q)
        {
            keys.push(q);
        }
    }
    let mut any = false;
    for key in keys {
        let group: Vec<&ReportAnalysis> =
            input.analyses.iter().filter(|a| a.question.as_deref() == Some(key)).collect();
        if group.len() < 2 {
            continue;
        }
        any = true;
        let t = triangulate(key, &group);
        let pct = t.quantity == Quantity::Relative;
        let what =
            if pct { "relative effect (percent of the counterfactual)" } else { "average effect in outcome units" };
        let _ = writeln!(out, "<h3>{}</h3>", escape(key));
        let _ = writeln!(
            out,
            "<p>{} methods answer it; they are compared on the {what}. {}</p>",
            group.len(),
            escape(&t.families_sentence())
        );
        if !pct {
            out.push_str("<p>Not every method reports a relative effect, so the comparison uses the average effect; series methods report it per period and unit-level methods per unit, so check that the estimands match before reading agreement into it.</p>\n");
        }
        let _ = writeln!(
            out,
            "<div class=\"table-wrap\"><table><thead><tr><th>method</th><th>estimate</th><th>{}</th><th>verdict</th></tr></thead><tbody>",
            numbers::interval_name(input.analyses.first().map_or(0.9, |a| a.result.level))
        );
        for ((label, s, v), a) in t.rows.iter().zip(&group) {
            let (p, i) = numbers::summary_numbers(s, pct, a.result.outcome_unit.as_deref());
            let _ = writeln!(
                out,
                "<tr><td>{}</td><td class=\"num\">{p}</td><td class=\"num\">{i}</td><td>{}</td></tr>",
                escape(label),
                verdict_chip(*v)
            );
        }
        out.push_str("</tbody></table></div>\n");
        let f = |x: f64| {
            if pct { numbers::percent(x) } else { numbers::signed(x, numbers::decimals_for(&[x])) }
        };
        let mut sentence = format!("<p><span class=\"chip a-{w}\">{w}</span> ", w = t.agreement.word());
        sentence.push_str(&escape(&match t.agreement {
            Agreement::Agree => format!(
                "Every interval contains the range {} to {}, and every method reaches the same verdict.",
                f(t.common.map_or(f64::NAN, |c| c.0)),
                f(t.common.map_or(f64::NAN, |c| c.1))
            ),
            Agreement::Compatible => format!(
                "Every interval contains the range {} to {}, so the methods are consistent with one common effect, but their verdicts differ (none points the opposite way).",
                f(t.common.map_or(f64::NAN, |c| c.0)),
                f(t.common.map_or(f64::NAN, |c| c.1))
            ),
            Agreement::Disagree => {
                let mut s = String::from("The methods disagree:");
                if t.opposite_directions {
                    s.push_str(" one finds a gain where another finds a loss.");
                }
                if t.common.is_none() {
                    s.push_str(" no single value lies inside every interval");
                    if !t.disjoint_pairs.is_empty() {
                        let pairs: Vec<String> = t.disjoint_pairs.iter().map(|(a, b)| format!("{a} / {b}")).collect();
                        s.push_str(&format!(" (intervals that do not overlap: {})", pairs.join("; ")));
                    }
                    s.push('.');
                }
                s.push_str(" At least one method's assumptions fail here; see the warnings of each analysis.");
                s
            }
            Agreement::Undetermined => "Fewer than two methods have a finite interval, so agreement cannot be judged.".into(),
        }));
        sentence.push_str("</p>\n");
        out.push_str(&sentence);
        let bars: Vec<EstimateBar> =
            t.rows.iter().map(|(l, s, _)| EstimateBar { label: l.clone(), summary: *s }).collect();
        let level = group[0].result.level;
        let quantity = if pct { "relative effect" } else { "average effect" };
        let c = charts::estimates_chart(
            &format!("triangulation-{}", id_of(key)),
            &bars,
            None,
            level,
            quantity,
            if pct { ValueFormat::Percent } else { ValueFormat::Number },
        );
        figure(out, &c);
    }
    if !any {
        out.push_str("<p>Each question here is answered by one method only, so there is nothing to set side by side. Answering the same question with a second, independent method (for example a forecast and a synthetic control) is the best check an observational study has.</p>\n");
    }
    out.push_str(
        "<p>How agreement is judged: each method's highest-density interval (the one its verdict uses) is taken at its stated level. The methods <b>agree</b> when one range lies inside every interval and all verdict words are the same; they are <b>compatible</b> when such a range exists but the verdicts differ without pointing in opposite directions; they <b>disagree</b> when no value lies inside every interval or one verdict is a gain and another a loss.</p>\n",
    );
    out.push_str("</section>\n");
}

/// Render the whole report as one self-contained HTML document.
pub fn render(input: &ReportInput) -> String {
    let mut out = String::with_capacity(256 * 1024);
    out.push_str("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\" />\n");
    out.push_str("<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\" />\n");
    let _ = writeln!(out, "<title>{}</title>", escape(&input.title));
    let _ = writeln!(out, "<style>{CSS}</style>\n</head>\n<body>\n<div class=\"page\">");
    let _ = writeln!(
        out,
        "<header class=\"masthead\"><p class=\"brand\"><b>&#9632;</b> aftercast report</p><h1>{}</h1><p class=\"lede\">{}</p></header>",
        escape(&input.title),
        escape(&input.question)
    );
    out.push_str(
        "<nav class=\"toc\"><a href=\"#answers\">Answers</a><a href=\"#triangulation\">Do the methods agree?</a>",
    );
    if let Some(first) = input.analyses.first() {
        let _ = write!(out, "<a href=\"#analysis-{}\">Each method</a>", id_of(&first.stem));
    }
    out.push_str("<a href=\"#data\">Data</a><a href=\"#appendix\">Diagnostics</a><a href=\"#caution\">Caution</a><a href=\"#reproduce\">Reproduce</a></nav>\n<main>\n");
    answers_section(&mut out, input);
    triangulation_section(&mut out, input);
    for a in &input.analyses {
        analysis_section(&mut out, a);
    }
    data_section(&mut out, input);
    appendix_section(&mut out, input);
    out.push_str("<section id=\"caution\">\n<h2>How much to trust this</h2>\n");
    out.push_str("<p class=\"caution\">These are observational estimates. Each rests on assumptions, listed with each analysis, that no data can prove: that nothing else changed at the same time, that the comparison series or units were untouched, that the past pattern would have continued. A randomized test with a held-out control group is stronger evidence wherever one is possible; where one exists, compare against it.</p>\n");
    out.push_str("<p>The intervals describe the uncertainty of each method given its assumptions; they do not cover the risk that the assumptions are wrong. Agreement between independent methods makes that risk smaller, not zero.</p>\n</section>\n");
    out.push_str("<section id=\"reproduce\">\n<h2>Reproduce this report</h2>\n<p>This command, run on the same files (same SHA-256 fingerprints), writes the same numbers:</p>\n");
    let _ = writeln!(out, "<pre><code>{}</code></pre>", escape(&input.command));
    if let Some(s) = &input.study_file {
        let _ = writeln!(
            out,
            "<p>Study file <code>{}</code>:</p>\n<pre><code>{}</code></pre>",
            escape(&s.path),
            escape(&s.contents)
        );
    }
    out.push_str("<div class=\"table-wrap\"><table><thead><tr><th>analysis</th><th>verb and method</th><th>seed</th><th>version</th></tr></thead><tbody>\n");
    for a in &input.analyses {
        let r = &a.result;
        let _ = writeln!(
            out,
            "<tr><td><code>{}</code></td><td><code>{} {}</code></td><td class=\"num\">{}</td><td>{}</td></tr>",
            escape(&a.stem),
            escape(&r.verb),
            escape(&r.method),
            r.seed,
            escape(&r.tool_version)
        );
    }
    out.push_str("</tbody></table></div>\n</section>\n</main>\n");
    let _ = writeln!(
        out,
        "<footer>Made by aftercast {}. Self-contained page: no scripts, no fonts or images fetched from anywhere.</footer>\n</div>\n</body>\n</html>",
        escape(aftercast_core::result::TOOL_VERSION)
    );
    out
}

/// The report's styles with every rule confined to the elements under `root` (a class
/// selector): a page that embeds a fragment (a notebook) keeps its own look. `:root`, `html`
/// and `body` become `root` itself; print rules are left out.
fn scoped_css(root: &str) -> String {
    let mut out = String::new();
    scope_rules(CSS, root, &mut out);
    out
}

/// The rules of `css` with every selector put under `root` (`:root`, `html` and `body` become
/// `root` itself), rule by rule however many share a line; `@media` blocks are scoped inside,
/// print rules and other at-rules left out (a notebook cell is not printed on its own).
fn scope_rules(css: &str, root: &str, out: &mut String) {
    let mut rest = css;
    while let Some(open) = rest.find('{') {
        let head = rest[..open].trim();
        let Some(len) = block_len(&rest[open..]) else { return };
        let body = &rest[open + 1..open + len - 1];
        rest = &rest[open + len..];
        if let Some(query) = head.strip_prefix("@media") {
            if !query.trim_start().starts_with("print") {
                out.push_str(head);
                out.push_str("{\n");
                scope_rules(body, root, out);
                out.push_str("}\n");
            }
            continue;
        }
        if head.starts_with('@') || head.is_empty() {
            continue;
        }
        let scoped: Vec<String> = head
            .split(',')
            .map(|sel| match sel.trim() {
                ":root" | "html" | "body" => root.to_string(),
                sel => format!("{root} {sel}"),
            })
            .collect();
        out.push_str(&scoped.join(","));
        out.push('{');
        out.push_str(body.trim());
        out.push_str("}\n");
    }
}

/// The length of the block `text` opens with (from its `{` to the matching `}`, both counted).
fn block_len(text: &str) -> Option<usize> {
    let mut depth = 0usize;
    for (i, c) in text.char_indices() {
        match c {
            '{' => depth += 1,
            '}' => {
                depth = depth.checked_sub(1)?;
                if depth == 0 {
                    return Some(i + 1);
                }
            }
            _ => {}
        }
    }
    None
}

/// One analysis as a notebook cell shows it: the answer card, the lead chart (inline SVG), the
/// warnings, what the estimate rests on and the caution, in one `<div>` whose styles apply to it alone. No scripts, nothing fetched.
pub fn fragment(a: &ReportAnalysis) -> String {
    let mut out = String::with_capacity(64 * 1024);
    let _ = writeln!(out, "<div class=\"aftercast-cell\"><style>{}</style>", scoped_css(".aftercast-cell"));
    out.push_str("<div class=\"answers\">\n");
    let mut card = String::new();
    other_card(&mut card, a, 0);
    // the card's link leads to the full report's details, which a notebook cell does not hold
    if let Some(i) = card.find("<p class=\"more\">")
        && let Some(j) = card[i..].find("</p>")
    {
        card.replace_range(i..i + j + 4, "");
    }
    out.push_str(&card);
    out.push_str("</div>\n");
    let charts = charts::charts_for(&a.result, &a.draws, &a.figures, &a.stem);
    if let Some(c) = charts.first() {
        figure(&mut out, c);
    }
    let warnings = all_warnings(&a.result);
    if !warnings.is_empty() {
        out.push_str("<ul class=\"warnings\">\n");
        for w in &warnings {
            let _ = writeln!(out, "<li>{}</li>", escape(w));
        }
        out.push_str("</ul>\n");
    }
    if !a.result.assumptions.is_empty() {
        out.push_str("<p><b>What this rests on</b></p>\n<ul class=\"rests\">\n");
        for s in &a.result.assumptions {
            let _ = writeln!(out, "<li>{}</li>", escape(s));
        }
        out.push_str("</ul>\n");
    }
    let _ = writeln!(out, "<p class=\"caution\">{}</p>\n</div>", escape(CAUTION));
    out
}

/// Render and write the report atomically.
///
/// # Errors
/// [`ReportError::Write`].
pub fn write(input: &ReportInput, path: &Path) -> Result<(), ReportError> {
    write_atomic(path, render(input).as_bytes())
}

#[cfg(test)]
mod tests {
    use super::{CSS, scope_rules, scoped_css};

    #[test]
    fn every_rule_of_a_line_is_scoped() {
        let mut out = String::new();
        scope_rules(".a{color:red}.b,.c{color:blue}\nbody{margin:0}", ".cell", &mut out);
        assert_eq!(out, ".cell .a{color:red}\n.cell .b,.cell .c{color:blue}\n.cell{margin:0}\n");
    }

    #[test]
    fn media_blocks_are_scoped_inside_and_print_is_left_out() {
        let mut out = String::new();
        scope_rules("@media (max-width:9px){\n h1{x:1}\n}\n@media print{\n @page{m:1}\n h1{x:2}\n}\n", ".c", &mut out);
        assert_eq!(out, "@media (max-width:9px){\n.c h1{x:1}\n}\n");
    }

    #[test]
    fn no_selector_of_the_report_escapes_the_cell() {
        let css = scoped_css(".aftercast-cell");
        let mut rules = 0;
        for line in css.lines() {
            if line.starts_with("@media") || line == "}" {
                continue;
            }
            rules += 1;
            let (head, _) = line.split_once('{').unwrap_or((line, ""));
            for sel in head.split(',') {
                assert!(sel.starts_with(".aftercast-cell"), "unscoped selector '{sel}' in '{line}'");
            }
        }
        // every rule of the stylesheet outside print is kept: its blocks less its one @media
        let screen = CSS.split("@media print").next().unwrap_or("");
        assert_eq!(rules, screen.matches('{').count() - screen.matches("@media").count());
        assert!(!css.contains("@page"));
    }
}
