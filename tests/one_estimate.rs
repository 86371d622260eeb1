//! Issue 11 (one estimate from every estimator to every output), through the real binary:
//! the ROPE's units are applied once, on the right summary (hand-computed verdicts for
//! `compare --summarize` and `compare --plasmode`); negative values parse; a single verb's
//! `--out` keeps its draws, and the terminal, result.json and report.html show the same point
//! and interval.

use aftercast_core::result::{AnalysisResult, Judged, Verdict};
use std::path::Path;
use std::process::Command;

fn run(args: &[&str], dir: &Path) -> (AnalysisResult, String) {
    let json = dir.join(format!("r{}.json", args.len() + args.iter().map(|a| a.len()).sum::<usize>()));
    let out = Command::new(env!("CARGO_BIN_EXE_aftercast")).args(args).arg("--json").arg(&json).output().expect("run");
    assert_eq!(out.status.code(), Some(0), "{args:?}: {}", String::from_utf8_lossy(&out.stderr));
    let r: AnalysisResult = serde_json::from_slice(&std::fs::read(&json).expect("json")).expect("typed result");
    (r, String::from_utf8_lossy(&out.stdout).into_owned())
}

/// Three comparisons against a truth of 1000 with biases 2, 3 and 4 (0.2%, 0.3%, 0.4%).
fn history(dir: &Path) -> String {
    let p = dir.join("history.jsonl");
    let mut text = String::new();
    for (i, est) in [1002.0, 1003.0, 1004.0].iter().enumerate() {
        text.push_str(&format!(
            "{{\"method\":\"nearest\",\"setting\":\"test {i}\",\"metric\":\"spend\",\"truth\":1000.0,\"estimate\":{est},\"lower\":{},\"upper\":{},\"level\":0.9}}\n",
            est - 5.0,
            est + 5.0
        ));
    }
    std::fs::write(&p, text).expect("write history");
    p.to_string_lossy().into_owned()
}

#[test]
fn issue_11_compare_summarize_judges_the_rope_in_its_own_units() {
    let dir = tempfile::tempdir().expect("tempdir");
    let h = history(dir.path());
    // With three records the 90% HDI holds all three: bias [2, 4], relative bias [0.2%, 0.4%].
    // Default ROPE +-1% of the truth: [0.2%, 0.4%] lies inside it -> negligible (before the fix
    // the bias [2, 4] was judged against +-0.01 outcome units and called a gain).
    let (r, stdout) = run(&["compare", "--summarize", &h], dir.path());
    assert_eq!(r.judged_on.quantity, Judged::Relative);
    assert_eq!(r.verdict, Verdict::Negligible);
    assert!(stdout.contains("How far each method has landed"), "the per-method table:\n{stdout}");
    // ROPE of 3 outcome units: [2, 4] is above zero and reaches into [-3, 3] -> gain-but-small.
    let (r, _) = run(&["compare", "--summarize", &h, "--rope", "3"], dir.path());
    assert_eq!((r.judged_on.quantity, r.verdict), (Judged::Average, Verdict::GainButSmall));
    // ROPE of 1 outcome unit: [2, 4] lies wholly above it -> gain.
    let (r, _) = run(&["compare", "--summarize", &h, "--rope", "1"], dir.path());
    assert_eq!(r.verdict, Verdict::Gain);
    // ROPE of 0.1% of the truth: [0.2%, 0.4%] lies above it -> gain.
    let (r, _) = run(&["compare", "--summarize", &h, "--rope", "0.1%"], dir.path());
    assert_eq!(r.verdict, Verdict::Gain);
    // asymmetric, negative bounds parse: [-2%, 1%]
    let (r, _) = run(&["compare", "--summarize", &h, "--rope", "-2%:1%"], dir.path());
    assert_eq!((r.rope.low, r.rope.high), (-0.02, 0.01));
    assert_eq!(r.verdict, Verdict::Negligible);
}

/// A unit table where the treated units' simulated outcomes carry a known effect of 10 with
/// little noise (outcome = 2 x + noise of sd about 0.3), so every plasmode estimate is near 10.
fn units(dir: &Path) -> String {
    let p = dir.join("units.csv");
    let mut text = String::from("treatment,x,y\n");
    for i in 0..200 {
        let x = (i % 20) as f64;
        let t = u8::from((i * 7919) % 10 < 3 + (i % 20) / 7);
        let noise = (((i * 104_729) % 13) as f64 - 6.0) / 20.0;
        text.push_str(&format!("{t},{x},{}\n", 2.0 * x + noise));
    }
    std::fs::write(&p, text).expect("write units");
    p.to_string_lossy().into_owned()
}

#[test]
fn issue_11_plasmode_judges_the_rope_in_its_own_units() {
    let dir = tempfile::tempdir().expect("tempdir");
    let u = units(dir.path());
    let base = [
        "compare",
        "--plasmode",
        u.as_str(),
        "--outcome",
        "y",
        "--covariates",
        "x",
        "--effect",
        "10",
        "--replicates",
        "30",
        "--methods",
        "regression-imputation",
    ];
    // Outcome-unit ROPE of 100: estimates near 10 lie inside [-100, 100] -> negligible.
    let mut a = base.to_vec();
    a.extend(["--rope", "100"]);
    let (r, stdout) = run(&a, dir.path());
    assert_eq!((r.judged_on.quantity, r.verdict), (Judged::Average, Verdict::Negligible), "{:?}", r.effect.average);
    assert!(stdout.contains("How each method does on data with a known effect"), "{stdout}");
    // Outcome-unit ROPE of 5: estimates near 10 lie above it -> gain.
    let mut a = base.to_vec();
    a.extend(["--rope", "5"]);
    assert_eq!(run(&a, dir.path()).0.verdict, Verdict::Gain);
    // The default ROPE is in percent, but simulated estimates have no counterfactual level:
    // the verdict can only say the sign (before the fix +-1% was read as +-0.01 outcome units),
    // and a warning says so.
    let (r, _) = run(&base, dir.path());
    assert_eq!((r.judged_on.quantity, r.verdict), (Judged::Sign, Verdict::Gain));
    assert!(r.warnings.iter().any(|w| w.contains("only whether the interval excludes zero")), "{:?}", r.warnings);
}

#[test]
fn issue_11_a_single_verb_keeps_its_draws_and_shows_one_number_everywhere() {
    let dir = tempfile::tempdir().expect("tempdir");
    let u = units(dir.path());
    let out = dir.path().join("out");
    let o = out.to_string_lossy().into_owned();
    let (r, stdout) = run(
        &[
            "match",
            "--data",
            &u,
            "--treatment",
            "treatment",
            "--outcome",
            "y",
            "--covariates",
            "x",
            "--method",
            "ipw",
            "--draws",
            "200",
            "--out",
            &o,
            "--threshold",
            "-1",
        ],
        dir.path(),
    );
    let kept = aftercast_core::draws_file::read(&out.join("draws.parquet")).expect("draws.parquet");
    assert_eq!(kept.average.len(), 200, "one row per draw");
    assert_eq!(r.threshold, Some(-1.0), "a negative threshold parses");
    let html = std::fs::read_to_string(out.join("report.html")).expect("report");
    assert!(!html.contains("No draws were kept"));
    let line = aftercast_report::numbers::judged_line(&r);
    let (point, interval) = aftercast_report::numbers::point_and_interval(&line.summary, line.percent);
    assert!(stdout.contains(&point) && stdout.contains(&interval), "terminal: {point} {interval}\n{stdout}");
    assert!(html.contains(&point) && html.contains(&interval), "report: {point} {interval}");
    let on_disk: AnalysisResult =
        serde_json::from_slice(&std::fs::read(out.join("result.json")).expect("result.json")).expect("typed");
    assert_eq!(on_disk, r, "--json and --out write the same result");
    // the point answer is the estimator's own (for ipw: the weighted difference), not the draws' mean
    let diag_point = r.diagnostics["point_estimate"].as_f64().expect("point");
    assert_eq!(r.effect.average.estimate, diag_point);
}
