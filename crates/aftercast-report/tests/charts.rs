//! Charts: every view of every verb decodes as PNG of the expected size, is not blank, draws its
//! data in the palette's colours, and its SVG parses as XML. Odd data draws a note, never panics.
//!
//! Set `AFTERCAST_CHART_DIR=/some/dir` to keep the files for looking at them.

mod common;

use aftercast_core::estimate::{Figures, KeptDraws};
use aftercast_core::result::{AnalysisResult, Summary};
use aftercast_report::charts::{self, PosteriorSource, theme};
use std::path::Path;

/// Thresholds of the pixel checks (one place).
mod tol {
    /// Luminance variance (0..255 scale) below which a picture counts as blank.
    pub const MIN_VARIANCE: f64 = 50.0;
    /// Distance (max over channels) within which a pixel counts as a palette colour.
    pub const COLOUR_DIST: i32 = 12;
    /// Pixels of a data colour that a chart drawing that colour must contain.
    pub const MIN_COLOUR_PIXELS: usize = 200;
}

struct Decoded {
    width: u32,
    height: u32,
    rgb: Vec<u8>,
}

fn decode(bytes: &[u8]) -> Decoded {
    let dec = png::Decoder::new(bytes);
    let mut reader = dec.read_info().expect("PNG header");
    let mut buf = vec![0; reader.output_buffer_size()];
    let info = reader.next_frame(&mut buf).expect("PNG frame");
    assert_eq!(info.color_type, png::ColorType::Rgb, "charts are RGB");
    assert_eq!(info.bit_depth, png::BitDepth::Eight);
    buf.truncate(info.buffer_size());
    Decoded { width: info.width, height: info.height, rgb: buf }
}

fn luminance_variance(d: &Decoded) -> f64 {
    let lum: Vec<f64> =
        d.rgb.chunks(3).map(|p| 0.299 * f64::from(p[0]) + 0.587 * f64::from(p[1]) + 0.114 * f64::from(p[2])).collect();
    let mean = lum.iter().sum::<f64>() / lum.len() as f64;
    lum.iter().map(|l| (l - mean).powi(2)).sum::<f64>() / lum.len() as f64
}

fn count_colour(d: &Decoded, c: plotters::style::RGBColor) -> usize {
    d.rgb
        .chunks(3)
        .filter(|p| {
            (i32::from(p[0]) - i32::from(c.0)).abs() <= tol::COLOUR_DIST
                && (i32::from(p[1]) - i32::from(c.1)).abs() <= tol::COLOUR_DIST
                && (i32::from(p[2]) - i32::from(c.2)).abs() <= tol::COLOUR_DIST
        })
        .count()
}

/// A palette colour laid over the paper background at `alpha` (how translucent fills look).
fn over_paper(c: plotters::style::RGBColor, alpha: f64) -> plotters::style::RGBColor {
    let mix = |a: u8, b: u8| (alpha * f64::from(a) + (1.0 - alpha) * f64::from(b)).round() as u8;
    let p = theme::PAPER;
    plotters::style::RGBColor(mix(c.0, p.0), mix(c.1, p.1), mix(c.2, p.2))
}

fn parse_svg(text: &str) {
    let doc = roxmltree::Document::parse(text).expect("SVG parses as XML");
    assert_eq!(doc.root_element().tag_name().name(), "svg");
    assert!(doc.descendants().any(|n| n.has_tag_name("text")), "SVG has text");
}

fn out_dir(tmp: &Path) -> std::path::PathBuf {
    match std::env::var_os("AFTERCAST_CHART_DIR") {
        Some(d) => d.into(),
        None => tmp.to_path_buf(),
    }
}

fn none() -> (KeptDraws, Figures) {
    (KeptDraws::default(), Figures::default())
}

#[test]
fn every_view_of_every_verb_is_written_decodes_and_is_not_blank() {
    let tmp = tempfile::tempdir().expect("tempdir");
    let dir = out_dir(tmp.path());
    let expected_views: &[(&str, &[&str])] = &[
        ("forecast", &["counterfactual", "effect", "running-total", "posterior"]),
        ("synthetic", &["treated-vs-synthetic", "effect", "running-total", "placebo-gaps", "weights", "posterior"]),
        ("match", &["propensity", "balance", "rosenbaum", "posterior"]),
        ("compare", &["versus-truth", "posterior"]),
        ("backtest", &["power", "mde", "posterior"]),
    ];
    for (stem, result) in common::all() {
        let (draws, figures) = common::inputs_for(stem);
        let planned = charts::charts_for(&result, &draws, &figures, stem);
        let names: Vec<&str> = planned.iter().map(|c| c.name.as_str()).collect();
        let views = expected_views.iter().find(|(s, _)| *s == stem).expect("expected views").1;
        for v in views {
            assert!(names.contains(&format!("{stem}-{v}").as_str()), "{stem}: missing view {v} in {names:?}");
        }
        for c in &planned {
            assert!(!c.is_note(), "{}: fixture data should draw, not fall back to a note", c.name);
            assert!(!c.caption.is_empty() && c.caption.ends_with('.'), "{}: caption is one sentence", c.name);
        }
        let written = charts::write_all(&result, &draws, &figures, &dir, stem).expect("write_all");
        assert_eq!(written.len(), 2 * planned.len(), "{stem}: a PNG and an SVG per chart");
        for c in &planned {
            let png = std::fs::read(dir.join(format!("{}.png", c.name))).expect("png file");
            let d = decode(&png);
            assert_eq!((d.width, d.height), (c.width, c.height), "{}: size", c.name);
            let var = luminance_variance(&d);
            assert!(var > tol::MIN_VARIANCE, "{}: luminance variance {var} looks blank", c.name);
            let svg = std::fs::read_to_string(dir.join(format!("{}.svg", c.name))).expect("svg file");
            parse_svg(&svg);
        }
    }
}

#[test]
fn the_counterfactual_view_draws_observed_ink_and_clay_counterfactual() {
    let r = common::forecast();
    let (d, f) = none();
    let charts = charts::charts_for(&r, &d, &f, "f");
    let c = charts.iter().find(|c| c.name == "f-counterfactual").expect("chart");
    assert_eq!((c.width, c.height), (charts::WIDTH, charts::HEIGHT));
    let d = decode(&c.to_png().expect("png"));
    assert!(count_colour(&d, theme::INK) > tol::MIN_COLOUR_PIXELS, "observed line in ink");
    assert!(count_colour(&d, theme::CLAY) > tol::MIN_COLOUR_PIXELS, "counterfactual in clay");
    assert!(count_colour(&d, theme::POST_TINT) > 10_000, "post-period tint covers an area");
    let running = charts.iter().find(|c| c.name == "f-running-total").expect("running total");
    let d = decode(&running.to_png().expect("png"));
    assert!(count_colour(&d, theme::SLATE) > tol::MIN_COLOUR_PIXELS, "running total in slate");
}

#[test]
fn posterior_marks_estimate_hdi_rope_and_threshold_from_draws() {
    let r = common::forecast();
    let (rel, avg) = common::forecast_draws(3000);
    let rope = Some((r.rope.low, r.rope.high));
    let s = r.effect.relative.expect("relative");
    let from_draws = charts::posterior_chart(
        "p",
        PosteriorSource::Draws(&rel),
        &s,
        0.9,
        rope,
        None,
        "relative effect",
        theme::ValueFormat::Percent,
    );
    let d = decode(&from_draws.to_png().expect("png"));
    assert!(count_colour(&d, over_paper(theme::TEAL, 0.85)) > 2_000, "HDI bars in teal");
    assert!(from_draws.caption.contains("verdict is judged"), "{}", from_draws.caption);
    let bare = charts::posterior_chart(
        "b",
        PosteriorSource::Draws(&rel),
        &s,
        0.9,
        None,
        None,
        "relative effect",
        theme::ValueFormat::Percent,
    );
    assert!(!bare.caption.contains("ROPE"), "no ROPE, no ROPE in the caption");
    // the header (title) is in standalone files, left to the page in the report
    assert!(bare.to_svg(true).expect("svg").contains(&bare.title));
    assert!(!bare.to_svg(false).expect("svg").contains(&bare.title));
    // a threshold on the average effect is drawn (brick dashes) and named with its chance
    let mut avg_summary = r.effect.average;
    avg_summary.prob_above_threshold = Some(avg.iter().filter(|v| **v > 45.0).count() as f64 / avg.len() as f64);
    let t = charts::posterior_chart(
        "t",
        PosteriorSource::Draws(&avg),
        &avg_summary,
        0.9,
        None,
        Some(45.0),
        "average effect per period",
        theme::ValueFormat::Number,
    );
    let svg = t.to_svg(true).expect("svg");
    assert!(svg.contains("threshold +45.0: chance above"), "threshold in the legend");
    let dt = decode(&t.to_png().expect("png"));
    assert!(count_colour(&dt, theme::BRICK) > tol::MIN_COLOUR_PIXELS, "threshold line in brick");
    // a ready histogram works too
    let edges = [0.0, 0.01, 0.02, 0.03, 0.04, 0.05];
    let counts = [1.0, 5.0, 9.0, 4.0, 1.0];
    let h = charts::posterior_chart(
        "h",
        PosteriorSource::Histogram(&edges, &counts),
        &s,
        0.9,
        rope,
        None,
        "relative effect",
        theme::ValueFormat::Percent,
    );
    parse_svg(&h.to_svg(true).expect("svg"));
}

fn nan_summary() -> Summary {
    Summary {
        estimate: f64::NAN,
        mean: f64::NAN,
        median: f64::NAN,
        sd: f64::NAN,
        lower: f64::NAN,
        upper: f64::NAN,
        hdi_lower: f64::NAN,
        hdi_upper: f64::NAN,
        prob_positive: f64::NAN,
        prob_above_threshold: None,
    }
}

#[test]
fn odd_data_draws_notes_and_never_panics() {
    let tmp = tempfile::tempdir().expect("tempdir");
    // empty path, NaN summaries, empty balance and weights, a one-draw posterior
    let mut r: AnalysisResult = common::forecast();
    r.path = Some(vec![]);
    r.effect.average = nan_summary();
    r.effect.relative = Some(nan_summary());
    r.weights = Some(vec![]);
    r.balance = Some(vec![]);
    r.planning = Some(aftercast_core::result::Planning {
        level: 0.9,
        target_power: 0.8,
        wait_unit: "days".into(),
        false_positive_rate: aftercast_core::result::FalsePositiveRate {
            rate: f64::NAN,
            lower: f64::NAN,
            upper: f64::NAN,
            placebos: 0,
        },
        power: vec![aftercast_core::result::PlanPower { wait: 7, lift: f64::NAN, power: f64::NAN }],
        mde: vec![aftercast_core::result::PlanMde { wait: 7, mde: None }],
        wait_for: vec![],
        longest_wait: 7,
        answer: vec![],
    });
    let figures = Figures {
        propensity: Some(aftercast_core::estimate::PropensityHistogram {
            edges: vec![0.0, 0.5],
            treated_before: vec![1.0, 2.0],
            ..Default::default()
        }),
        sensitivity: Some(aftercast_core::estimate::SensitivityCurve {
            gamma: vec![f64::NAN],
            p_upper: vec![f64::NAN],
            alpha: 0.05,
        }),
        ..Figures::default()
    };
    let draws = KeptDraws { relative: vec![0.02], ..KeptDraws::default() };
    let charts = charts::charts_for(&r, &draws, &figures, "odd");
    assert!(
        charts.iter().all(|c| c.is_note()),
        "{:?}",
        charts.iter().map(|c| (&c.name, c.is_note())).collect::<Vec<_>>()
    );
    let files = charts::write_all(&r, &draws, &figures, tmp.path(), "odd").expect("notes are written");
    for f in files.iter().filter(|f| f.extension().is_some_and(|e| e == "png")) {
        let d = decode(&std::fs::read(f).expect("read"));
        assert!(luminance_variance(&d) > 1.0, "the note text is visible in {}", f.display());
    }
    // a path with a single period and missing observations still draws
    let mut one = common::forecast();
    one.path.as_mut().expect("path").truncate(1);
    one.path.as_mut().expect("path")[0].observed = None;
    let (d0, f0) = none();
    for c in charts::charts_for(&one, &d0, &f0, "one") {
        c.to_png().expect("png of a one-period path");
        parse_svg(&c.to_svg(false).expect("svg"));
    }
    // constant draws fall back to the summary interval
    let s = common::summary(1.0, 0.0);
    let c = charts::posterior_chart(
        "c",
        PosteriorSource::Draws(&[1.0, 1.0, 1.0]),
        &s,
        0.9,
        Some((-0.5, 0.5)),
        None,
        "effect",
        theme::ValueFormat::Number,
    );
    assert!(!c.is_note());
    c.to_png().expect("png");
    // an impossible size is an error value
    let big = c.clone().with_size(10, 10);
    assert!(big.to_png().is_err());
    assert!(big.to_svg(true).is_err());
}

#[test]
fn write_errors_name_the_file() {
    let tmp = tempfile::tempdir().expect("tempdir");
    let blocker = tmp.path().join("file");
    std::fs::write(&blocker, b"x").expect("write");
    let (d, f) = none();
    let err = charts::write_all(&common::compare(), &d, &f, &blocker.join("charts"), "c")
        .expect_err("cannot write under a file");
    assert!(err.to_string().contains("charts"), "{err}");
}

#[test]
fn weights_beyond_the_row_limit_are_summed() {
    let w: Vec<(String, f64)> = (0..30).map(|i| (format!("unit {i}"), 1.0 / 30.0)).collect();
    let c = charts::weights_chart("w", &w, 10);
    let svg = c.to_svg(true).expect("svg");
    assert!(svg.contains("21 other donors"), "the tail is summed into one row");
    parse_svg(&svg);
}

#[test]
fn typed_figure_data_reaches_the_charts() {
    // synthetic: one placebo gap per kept donor run
    let s = common::synthetic();
    let (d, f) = common::inputs_for("synthetic");
    let c = charts::charts_for(&s, &d, &f, "s");
    let gaps = c.iter().find(|c| c.name == "s-placebo-gaps").expect("placebo chart");
    assert!(gaps.caption.contains("among 11 placebo gaps"), "{}", gaps.caption);
    // no placebo runs: no placebo chart (never an empty one)
    let (d0, f0) = none();
    assert!(charts::charts_for(&s, &d0, &f0, "s").iter().all(|c| c.name != "s-placebo-gaps"));
    // a plan: lifts are fractions, labelled in percent; one line per lift against the wait
    let b = common::backtest();
    let (d, f) = common::inputs_for("backtest");
    let c = charts::charts_for(&b, &d, &f, "b");
    for view in ["b-power", "b-mde"] {
        let chart = c.iter().find(|c| c.name == view).expect(view);
        assert!(!chart.is_note(), "{view} drawn");
        let svg = chart.to_svg(true).expect("svg");
        parse_svg(&svg);
        assert!(svg.contains('%'), "{view}: lifts are fractions, labelled in percent");
    }
    let power = c.iter().find(|c| c.name == "b-power").expect("power").to_svg(true).expect("svg");
    assert!(power.contains("+2% change") && power.contains("wait (days)") && power.contains("target 80%"));
    let mde = c.iter().find(|c| c.name == "b-mde").expect("mde").to_svg(true).expect("svg");
    assert!(mde.contains("wait (days)"));
}

#[test]
fn the_distribution_chart_histogram_holds_every_draw() {
    // The posterior chart is drawn from the kept draws: its bar shares sum to one (density 1).
    let (rel, _) = common::forecast_draws(4000);
    let r = common::forecast();
    let c = charts::posterior_chart(
        "d",
        PosteriorSource::Draws(&rel),
        &r.effect.relative.expect("relative"),
        0.9,
        None,
        None,
        "relative effect",
        theme::ValueFormat::Percent,
    );
    let shares = c.histogram_shares().expect("a histogram");
    assert!((shares.iter().sum::<f64>() - 1.0).abs() < 1e-12);
}

#[test]
fn the_rosenbaum_caption_brackets_the_crossing() {
    // fixture bound: p = 0.001 * Gamma^6 crosses 0.05 at Gamma = 50^(1/6) = 1.919, between grid points 1.9 and 2.0
    let r = common::matching();
    let (d, f) = common::inputs_for("match");
    let c = charts::charts_for(&r, &d, &f, "m");
    let rb = c.iter().find(|c| c.name == "m-rosenbaum").expect("rosenbaum");
    assert!(rb.caption.contains("between 1.90 and 2.00"), "{}", rb.caption);
}

#[test]
fn axis_limits_are_robust_to_a_single_outlier() {
    // 240 values on a smooth wave in [0, 10] and one value of 10,000 (an early data error)
    let mut v: Vec<f64> = (0..240).map(|i| 5.0 + 5.0 * (f64::from(i) / 20.0).sin()).collect();
    v[3] = 10_000.0;
    let (lo, hi, outside) = charts::robust_extent(&v).expect("finite values");
    assert!(lo <= 0.01 && hi < 12.0, "the axis follows the data, not the outlier: [{lo}, {hi}]");
    assert_eq!(outside, 1, "the outlier is counted (and marked on the chart)");
    // without outliers nothing is cut: the full range
    v[3] = 5.0;
    let (lo, hi, outside) = charts::robust_extent(&v).expect("finite values");
    let max = v.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let min = v.iter().copied().fold(f64::INFINITY, f64::min);
    assert_eq!((lo, hi, outside), (min, max, 0));
    // few values are never cut
    assert_eq!(charts::robust_extent(&[1.0, 2.0, 1_000.0]), Some((1.0, 1_000.0, 0)));
    assert_eq!(charts::robust_extent(&[f64::NAN]), None);

    // drawn: an effect chart with that outlier keeps its y ticks near the data
    let x: Vec<f64> = (0..240).map(f64::from).collect();
    let mut y: Vec<f64> = (0..240).map(|i| (f64::from(i) / 20.0).sin()).collect();
    y[3] = -1_500.0;
    let band: Vec<f64> = y.iter().map(|v| v - 0.3).collect();
    let band_hi: Vec<f64> = y.iter().map(|v| v + 0.3).collect();
    let c = charts::effect_chart("e", &x, charts::XKind::Numbers, (&y, &band, &band_hi), Some(200.0), 0.9);
    let svg = c.to_svg(true).expect("svg");
    assert!(!svg.contains("-1.5k") && !svg.contains("-1,500"), "no tick near the outlier");
    assert!(svg.contains("1 value beyond the axis"), "the clipped value is named");
}

#[test]
fn row_labels_stay_inside_the_canvas() {
    // labels far longer than the label area are shortened, never drawn past the left edge
    let long = "Daily app orders against a structural forecast from the pre-period and two untouched control series";
    let rows: Vec<charts::EstimateBar> = (0..3)
        .map(|k| charts::EstimateBar {
            label: format!("{long} ({k})"),
            summary: common::summary(0.02 + 0.01 * f64::from(k), 0.005),
        })
        .collect();
    let c = charts::estimates_chart("est", &rows, None, 0.9, "relative effect", theme::ValueFormat::Percent);
    let d = decode(&c.to_png().expect("png"));
    let paper = theme::PAPER;
    let (w, h) = (d.width as usize, d.height as usize);
    let column_is_paper = |x: usize| {
        (0..h).all(|y| {
            let i = (y * w + x) * 3;
            d.rgb[i..i + 3] == [paper.0, paper.1, paper.2]
        })
    };
    assert!(column_is_paper(0) && column_is_paper(1), "ink on the left edge: a label runs off the canvas");
    assert!(column_is_paper(w - 1), "ink on the right edge");
    let svg = c.to_svg(false).expect("svg");
    assert!(svg.contains('…'), "long labels are shortened with an ellipsis");
}
