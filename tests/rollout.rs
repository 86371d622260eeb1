//! `aftercast rollout` and `--by` through the real binary: the stored reference panel
//! (tests/reference/rollout_panel.csv, made by rollout_statsmodels.py) read with a starts file
//! and with an adoption column gives the same answer; the two-way baseline equals statsmodels;
//! bad input exits 2 with a located one-line message; segments are pooled and tested.

use aftercast_core::result::AnalysisResult;
use std::path::{Path, PathBuf};
use std::process::Command;

fn reference(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../../tests/reference").join(name)
}

fn run(args: &[&str], cwd: &Path) -> (i32, String, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_aftercast")).args(args).current_dir(cwd).output().expect("run");
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

fn result(p: &Path) -> AnalysisResult {
    serde_json::from_slice(&std::fs::read(p).expect("read result")).expect("typed result")
}

/// The stored panel as a long file with an adoption column and a segment column, plus a starts
/// file, in `dir`.
fn files(dir: &Path) {
    let text = std::fs::read_to_string(reference("rollout_panel.csv")).expect("panel");
    let mut long = String::from("unit,period,y,adopted,band\n");
    let mut starts = String::from("unit,start\n");
    let mut seen = std::collections::BTreeSet::new();
    for line in text.lines().skip(1) {
        let f: Vec<&str> = line.split(',').collect();
        let period: i64 = f[1].parse().expect("period");
        let adopted = f[3].parse::<i64>().is_ok_and(|s| period >= s);
        let band = if f[0] < "r16" { "east" } else { "west" };
        long.push_str(&format!("{},{},{},{},{band}\n", f[0], f[1], f[2], u8::from(adopted)));
        if seen.insert(f[0].to_string()) {
            starts.push_str(&format!("{},{}\n", f[0], f[3]));
        }
    }
    std::fs::write(dir.join("panel.csv"), long).expect("write");
    std::fs::write(dir.join("starts.csv"), starts).expect("write");
}

const BASE: [&str; 8] = ["rollout", "--data", "panel.csv", "--unit", "unit", "--time", "period", "--outcome"];

#[test]
fn starts_file_and_adoption_column_agree_and_twfe_equals_statsmodels() {
    let dir = tempfile::tempdir().expect("tempdir");
    let d = dir.path();
    files(d);
    let mut a: Vec<&str> = BASE.to_vec();
    a.extend(["y", "--starts", "starts.csv", "--draws", "200", "--json", "a.json"]);
    let (code, out, err) = run(&a, d);
    assert_eq!(code, 0, "{err}");
    assert!(out.contains("Effect by periods since adoption"), "{out}");
    let mut b: Vec<&str> = BASE.to_vec();
    b.extend(["y", "--adopted", "adopted", "--draws", "200", "--json", "b.json", "--quiet"]);
    assert_eq!(run(&b, d).0, 0);
    let (ra, rb) = (result(&d.join("a.json")), result(&d.join("b.json")));
    assert_eq!(ra.effect.average, rb.effect.average);
    assert_eq!(ra.breakdowns, rb.breakdowns);
    // statsmodels 0.15.0, y ~ C(unit) + C(period) + D on the same panel
    // (tests/reference/rollout_statsmodels.json, twfe_static.coef)
    let mut t: Vec<&str> = BASE.to_vec();
    t.extend(["y", "--starts", "starts.csv", "--method", "twfe", "--draws", "50", "--json", "t.json", "--quiet"]);
    assert_eq!(run(&t, d).0, 0);
    let sm: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(reference("rollout_statsmodels.json")).expect("ref"))
            .expect("json");
    let coef = sm["twfe_static"]["coef"].as_f64().expect("coef");
    assert!((result(&d.join("t.json")).effect.average.estimate - coef).abs() < 1e-8);
}

#[test]
fn segments_are_fitted_apart_pooled_and_tested() {
    let dir = tempfile::tempdir().expect("tempdir");
    let d = dir.path();
    files(d);
    let mut a: Vec<&str> = BASE.to_vec();
    a.extend(["y", "--starts", "starts.csv", "--by", "band", "--draws", "200", "--json", "s.json"]);
    let (code, out, err) = run(&a, d);
    assert_eq!(code, 0, "{err}");
    assert!(out.contains("Effect by segment"), "{out}");
    let r = result(&d.join("s.json"));
    let seg = r.breakdowns.iter().find(|b| b.by == "segment").expect("segment rows");
    assert_eq!(seg.rows.len(), 2);
    assert!(seg.test.is_some());
}

#[test]
fn bad_rollout_input_exits_2_with_a_located_message() {
    let dir = tempfile::tempdir().expect("tempdir");
    let d = dir.path();
    files(d);
    // a unit that adopts, goes back to 0, then adopts again
    let panel = std::fs::read_to_string(d.join("panel.csv")).expect("panel");
    let twice = panel.replacen("r01,12,", "r01,12,X", 1);
    let twice: String = twice
        .lines()
        .map(|l| {
            if let Some(rest) = l.strip_prefix("r01,12,X") {
                let f: Vec<&str> = rest.split(',').collect();
                format!("r01,12,{},0,{}", f[0], f[2])
            } else {
                l.to_string()
            }
        })
        .collect::<Vec<_>>()
        .join("\n");
    std::fs::write(d.join("twice.csv"), twice + "\n").expect("write");
    let mut a: Vec<&str> = BASE.to_vec();
    a[2] = "twice.csv";
    a.extend(["y", "--adopted", "adopted"]);
    let (code, _, err) = run(&a, d);
    assert_eq!(code, 2, "{err}");
    assert!(err.contains("'r01'") && err.contains("12") && err.lines().count() == 1, "{err}");

    // a start outside the data
    std::fs::write(d.join("late.csv"), "unit,start\nr01,25\n").expect("write");
    let mut b: Vec<&str> = BASE.to_vec();
    b.extend(["y", "--starts", "late.csv"]);
    let (code, _, err) = run(&b, d);
    assert_eq!(code, 2);
    assert!(err.contains("late.csv, line 2") && err.contains("outside the data"), "{err}");

    // every unit adopting at once: nothing left to compare with
    let all: String = std::iter::once("unit,start".to_string())
        .chain((1..=30).map(|u| format!("r{u:02},8")))
        .collect::<Vec<_>>()
        .join("\n");
    std::fs::write(d.join("all.csv"), all + "\n").expect("write");
    let mut c: Vec<&str> = BASE.to_vec();
    c.extend(["y", "--starts", "all.csv"]);
    let (code, _, err) = run(&c, d);
    assert_eq!(code, 2);
    assert!(err.contains("left to compare with") && err.lines().count() == 1, "{err}");

    // a segment with one unit: left out with a warning, the rest goes on
    let lone = panel
        .lines()
        .map(|l| if l.starts_with("r30,") { l.replace(",west", ",lone") } else { l.to_string() })
        .collect::<Vec<_>>()
        .join("\n");
    std::fs::write(d.join("lone.csv"), lone + "\n").expect("write");
    let mut e: Vec<&str> = BASE.to_vec();
    e[2] = "lone.csv";
    e.extend(["y", "--starts", "starts.csv", "--by", "band", "--draws", "100", "--json", "lone.json", "--quiet"]);
    let (code, _, err) = run(&e, d);
    assert_eq!(code, 0, "{err}");
    let r = result(&d.join("lone.json"));
    assert!(r.warnings.iter().any(|w| w.contains("segment 'lone' is left out")), "{:?}", r.warnings);

    // an unknown unit in the starts file
    std::fs::write(d.join("unknown.csv"), "unit,start\nzz9,8\n").expect("write");
    let mut f: Vec<&str> = BASE.to_vec();
    f.extend(["y", "--starts", "unknown.csv"]);
    let (code, _, err) = run(&f, d);
    assert_eq!(code, 2);
    assert!(err.contains("unknown.csv, line 2") && err.contains("'zz9'"), "{err}");
}

/// `match --by`: the overall estimate is the treated-weighted mean of the segments.
#[test]
fn match_by_segment_pools_to_the_treated_weighted_mean() {
    let dir = tempfile::tempdir().expect("tempdir");
    let d = dir.path();
    let members = Path::new(env!("CARGO_MANIFEST_DIR")).join("../../demo-data/members.csv");
    let m = members.to_string_lossy().into_owned();
    let args = [
        "match",
        "--data",
        &m,
        "--treatment",
        "joined",
        "--outcome",
        "spend_90d",
        "--covariates",
        "spend_pre,visits_pre,tenure_months",
        "--method",
        "ipw",
        "--by",
        "age_band",
        "--draws",
        "100",
        "--json",
        "m.json",
        "--quiet",
    ];
    let (code, _, err) = run(&args, d);
    assert_eq!(code, 0, "{err}");
    let r = result(&d.join("m.json"));
    let seg = r.breakdowns.iter().find(|b| b.by == "segment").expect("segments");
    let total: usize = seg.rows.iter().map(|x| x.units).sum();
    let pooled: f64 = seg.rows.iter().map(|x| x.units as f64 * x.summary.estimate).sum::<f64>() / total as f64;
    assert!((r.effect.average.estimate - pooled).abs() < 1e-9);
    assert_eq!(seg.rows.len(), 6);
}

/// `forecast --group`: the headline is exactly the forecast of the summed series, each group has
/// its own row, and the "sum of the groups" row adds them up.
#[test]
fn grouped_forecast_is_the_total_plus_one_row_per_group() {
    let dir = tempfile::tempdir().expect("tempdir");
    let d = dir.path();
    let regions = Path::new(env!("CARGO_MANIFEST_DIR")).join("../../demo-data/regions_weekly.csv");
    let text = std::fs::read_to_string(regions).expect("regions");
    let keep = ["Ashcombe", "Birchfold", "Dunmere"];
    let mut long = String::from("region,week,revenue\n");
    let mut sums: std::collections::BTreeMap<String, f64> = std::collections::BTreeMap::new();
    for line in text.lines().skip(1) {
        let f: Vec<&str> = line.split(',').collect();
        if keep.contains(&f[0]) {
            long.push_str(&format!("{},{},{}\n", f[0], f[1], f[2]));
            *sums.entry(f[1].to_string()).or_insert(0.0) += f[2].parse::<f64>().expect("revenue");
        }
    }
    std::fs::write(d.join("long.csv"), long).expect("write");
    let total: String = std::iter::once("week,revenue".to_string())
        .chain(sums.iter().map(|(w, v)| format!("{w},{v:?}")))
        .collect::<Vec<_>>()
        .join("\n");
    std::fs::write(d.join("total.csv"), total + "\n").expect("write");
    let common =
        ["--time", "week", "--outcome", "revenue", "--start", "2026-04-06", "--draws", "100", "--log", "--quiet"];
    let mut g = vec!["forecast", "--data", "long.csv", "--group", "region", "--json", "g.json"];
    g.extend(common);
    let (code, _, err) = run(&g, d);
    assert_eq!(code, 0, "{err}");
    let mut t = vec!["forecast", "--data", "total.csv", "--json", "t.json"];
    t.extend(common);
    assert_eq!(run(&t, d).0, 0);
    let (rg, rt) = (result(&d.join("g.json")), result(&d.join("t.json")));
    assert_eq!(rg.effect.average, rt.effect.average);
    let seg = rg.breakdowns.iter().find(|b| b.by == "segment").expect("group rows");
    assert_eq!(seg.rows.len(), 4);
    let sum: f64 = seg.rows[..3].iter().map(|r| r.summary.estimate).sum();
    assert!((seg.rows[3].summary.estimate - sum).abs() < 1e-6 * sum.abs().max(1.0));
}

/// `compare --by`: the experiment's answer pooled over segments by treated units, and every
/// method row judged against its own segment's experimental answer.
#[test]
fn compare_by_segment_judges_each_method_within_its_segment() {
    let dir = tempfile::tempdir().expect("tempdir");
    let d = dir.path();
    let past = Path::new(env!("CARGO_MANIFEST_DIR")).join("../../demo-data/past_test");
    let (e, p) = (past.join("experiment.csv"), past.join("pool.csv"));
    let (e, p) = (e.to_string_lossy().into_owned(), p.to_string_lossy().into_owned());
    let args = [
        "compare",
        "--experiment",
        &e,
        "--arm",
        "arm",
        "--outcome",
        "spend_90d",
        "--pool",
        &p,
        "--covariates",
        "spend_pre,visits_pre,tenure_months",
        "--methods",
        "naive,ipw",
        "--by",
        "age_band",
        "--draws",
        "100",
        "--json",
        "c.json",
        "--quiet",
    ];
    let (code, _, err) = run(&args, d);
    assert_eq!(code, 0, "{err}");
    let r = result(&d.join("c.json"));
    let seg = r.breakdowns.iter().find(|b| b.by == "segment").expect("segments");
    let total: usize = seg.rows.iter().map(|x| x.units).sum();
    let pooled: f64 = seg.rows.iter().map(|x| x.units as f64 * x.summary.estimate).sum::<f64>() / total as f64;
    assert!((r.effect.average.estimate - pooled).abs() < 1e-9);
    let truth = r.truth.expect("pooled truth");
    assert!((truth.estimate - pooled).abs() < 1e-9);
    let rows = r.estimates.expect("method rows");
    assert_eq!(rows.len(), 2 * seg.rows.len());
    for row in &rows {
        let s = row.method.split(" · ").next().expect("segment prefix");
        let t = seg.rows.iter().find(|x| x.label == s).expect("its segment").summary.estimate;
        assert!((row.bias - (row.summary.estimate - t)).abs() < 1e-9, "{}", row.method);
    }
}
