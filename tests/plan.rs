//! `aftercast plan` through the real binary on the demo data: a study's analysis planned by
//! name equals the same plan written out by hand, and every kind of plan (forecast, synthetic,
//! match) gives the same `planning` section.

use aftercast_core::result::{AnalysisResult, Planning};
use std::path::Path;
use std::process::Command;

fn demo(name: &str) -> String {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../../demo-data").join(name).to_string_lossy().into_owned()
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

fn planning(r: &AnalysisResult) -> &Planning {
    r.planning.as_ref().expect("a planning section")
}

/// The shape every plan shares: power per (wait, lift), MDE per wait, a wait per lift, a
/// false-positive rate inside its interval.
fn check_shape(p: &Planning, lifts: &[f64]) {
    let waits: Vec<usize> = p.mde.iter().map(|m| m.wait).collect();
    assert!(!waits.is_empty());
    assert_eq!(p.power.len(), waits.len() * lifts.len());
    assert_eq!(p.wait_for.len(), lifts.len());
    let f = &p.false_positive_rate;
    assert!(f.lower <= f.rate && f.rate <= f.upper && f.placebos > 0, "{f:?}");
    for w in &waits {
        // power rises with the lift at every wait
        let mut row: Vec<(f64, f64)> = p.power.iter().filter(|x| x.wait == *w).map(|x| (x.lift, x.power)).collect();
        row.sort_by(|a, b| a.0.total_cmp(&b.0));
        assert!(row.windows(2).all(|x| x[1].1 >= x[0].1), "wait {w}: {row:?}");
    }
    assert_eq!(p.answer.len(), lifts.len());
}

#[test]
fn a_study_analysis_planned_by_name_equals_the_same_plan_by_hand() {
    let dir = tempfile::tempdir().expect("tempdir");
    let d = dir.path();
    for f in ["app_daily.csv", "calendar.csv"] {
        std::fs::copy(demo(f), d.join(f)).expect("copy");
    }
    let study = "title = \"plan by name\"\n[defaults]\nseed = 7\ndraws = 300\n\n[[analysis]]\nname = \"app\"\nverb = \"forecast\"\n[analysis.flags]\ndata = \"app_daily.csv\"\ntime = \"date\"\noutcome = \"app_orders\"\ncontrols = \"catalogue_orders,weather_index\"\nevents = \"calendar.csv\"\nstart = \"2026-03-02\"\nlog = true\nlog_controls = \"catalogue_orders\"\ntrend = \"level\"\nseason = [\"7\"]\n";
    std::fs::write(d.join("study.toml"), study).expect("study");
    let plan = ["--placebos", "12", "--waits", "7,14,28", "--lifts", "2,5"];
    let mut by_name = vec!["plan", "study", "study.toml", "app"];
    by_name.extend(plan);
    by_name.extend(["--json", "by-name.json", "--quiet"]);
    let (code, _, err) = run(&by_name, d);
    assert_eq!(code, 0, "{err}");
    let data = d.join("app_daily.csv").to_string_lossy().into_owned();
    let events = d.join("calendar.csv").to_string_lossy().into_owned();
    let mut by_hand = vec![
        "plan",
        "forecast",
        "--data",
        &data,
        "--time",
        "date",
        "--outcome",
        "app_orders",
        "--controls",
        "catalogue_orders,weather_index",
        "--events",
        &events,
        "--start",
        "2026-03-02",
        "--log",
        "--log-controls",
        "catalogue_orders",
        "--trend",
        "level",
        "--season",
        "7",
        "--seed",
        "7",
        "--draws",
        "300",
    ];
    by_hand.extend(plan);
    by_hand.extend(["--json", "by-hand.json", "--quiet"]);
    let (code, _, err) = run(&by_hand, d);
    assert_eq!(code, 0, "{err}");
    let a = result(&d.join("by-name.json"));
    let b = result(&d.join("by-hand.json"));
    assert_eq!(a.planning, b.planning);
    assert_eq!(a.effect, b.effect);
    assert_eq!(a.diagnostics, b.diagnostics);
    assert_eq!(a.warnings, b.warnings);
    check_shape(planning(&a), &[0.02, 0.05]);
    assert_eq!(planning(&a).wait_unit, "days");
    // with a season of 7 given by the user, placebo fits need one cycle of it (and at
    // least 30 periods): 12 placebo dates fit, each before the launch
    let bt = &a.diagnostics["backtest"];
    assert_eq!(bt["origins_completed"], 12);
    for o in bt["origins"].as_array().expect("origins") {
        let t = o["time"].as_str().expect("time");
        // 28 days from 2026-02-02 end on 2026-03-01, the day before the launch
        assert!(t <= "2026-02-02", "placebo window from {t} reaches the launch");
    }
    // a flag after the name replaces the study's own
    let (code, _, err) = run(
        &[
            "plan",
            "study",
            "study.toml",
            "app",
            "--placebos",
            "3",
            "--waits",
            "7",
            "--seed",
            "8",
            "--json",
            "o.json",
            "--quiet",
        ],
        d,
    );
    assert_eq!(code, 0, "{err}");
    assert_eq!(result(&d.join("o.json")).seed, 8);
    // a name the study lacks is refused, naming the ones it has
    let (code, _, err) = run(&["plan", "study", "study.toml", "nope"], d);
    assert_eq!(code, 2);
    assert!(err.contains("no analysis named 'nope'") && err.contains("app"), "{err}");
}

#[test]
fn panel_and_unit_table_plans_give_the_same_planning_section() {
    let dir = tempfile::tempdir().expect("tempdir");
    let d = dir.path();
    let regions = demo("regions_weekly.csv");
    let (code, out, err) = run(
        &[
            "plan",
            "synthetic",
            "--data",
            &regions,
            "--unit",
            "region",
            "--time",
            "week",
            "--outcome",
            "revenue",
            "--treated",
            "Elderhope,Fernbury,Highcrag,Marrowdale,Redtarn,Wrenfield",
            "--start",
            "2026-04-06",
            "--end",
            "2026-05-11",
            "--waits",
            "2,4,6",
            "--placebos",
            "10",
            "--json",
            "synthetic.json",
        ],
        d,
    );
    assert_eq!(code, 0, "{err}");
    let r = result(&d.join("synthetic.json"));
    assert_eq!(r.verb, "plan");
    let p = planning(&r);
    check_shape(p, &[0.01, 0.02, 0.05, 0.10]);
    assert_eq!(p.wait_unit, "weeks");
    // placebo dates before the sale and every one of the 34 untouched regions at the sale's
    // start (the post-period of 6 weeks holds the longest wait)
    let runs = r.diagnostics["backtest"]["origins"].as_array().expect("origins");
    let failures = r.diagnostics["backtest"]["failures"].as_array().expect("failures");
    let in_space = runs.iter().chain(failures).filter(|o| o.get("label").is_some()).count();
    assert_eq!(in_space, 34);
    assert!(runs.iter().any(|o| o.get("label").is_none()), "placebo dates too");
    // placebo dates: 6-week windows that end before the sale's first week (2026-04-06)
    for o in runs.iter().filter(|o| o.get("label").is_none()) {
        let t = o["time"].as_str().expect("time");
        assert!(t <= "2026-02-23", "placebo window from {t} reaches the sale");
    }
    assert!(out.contains("How long to wait"), "{out}");

    let members = demo("members.csv");
    let (code, out, err) = run(
        &[
            "plan",
            "match",
            "--data",
            &members,
            "--treatment",
            "joined",
            "--outcome",
            "spend_90d",
            "--covariates",
            "spend_pre,visits_pre,tenure_months",
            "--method",
            "nearest",
            "--sizes",
            "2000,8000,32000",
            "--placebos",
            "20",
            "--json",
            "match.json",
        ],
        d,
    );
    assert_eq!(code, 0, "{err}");
    let r = result(&d.join("match.json"));
    let p = planning(&r);
    check_shape(p, &[0.01, 0.02, 0.05, 0.10]);
    assert_eq!(p.wait_unit, "units");
    let m: Vec<f64> = p.mde.iter().map(|x| x.mde.unwrap_or(f64::INFINITY)).collect();
    // four times the units halve the smallest visible change, roughly: it falls with the size
    assert!(m[0] > m[1] && m[1] > m[2], "{m:?}");
    assert!(out.contains("How many units"), "{out}");
}

#[test]
fn a_plan_before_the_change_uses_the_whole_series_and_bad_waits_are_refused() {
    let dir = tempfile::tempdir().expect("tempdir");
    let d = dir.path();
    // the series ends on 2026-06-30; a start after it plans with all of it
    let data = demo("app_daily.csv");
    let base = [
        "plan",
        "forecast",
        "--data",
        &data,
        "--time",
        "date",
        "--outcome",
        "app_orders",
        "--trend",
        "level",
        "--season",
        "7",
        "--placebos",
        "5",
        "--draws",
        "200",
    ];
    let mut a = base.to_vec();
    a.extend(["--start", "2026-09-01", "--json", "later.json", "--quiet"]);
    let (code, _, err) = run(&a, d);
    assert_eq!(code, 0, "{err}");
    let r = result(&d.join("later.json"));
    let waits: Vec<usize> = planning(&r).mde.iter().map(|m| m.wait).collect();
    assert_eq!(waits, [7, 14, 28, 56], "no post-period: the default waits only");
    // a wait longer than the pre-period allows is refused in one line
    let mut a = base.to_vec();
    a.extend(["--start", "2026-03-02", "--waits", "5000"]);
    let (code, _, err) = run(&a, d);
    assert_eq!(code, 2, "{err}");
    assert_eq!(err.lines().count(), 1, "{err}");
    assert!(err.contains("shorter --waits"), "{err}");
}
