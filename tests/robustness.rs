//! Issue 14 (never lose an input, never abort), through the real binary: each numbered case of
//! the issue, with its exit code, a one-line message, no backtrace or "internal error", the
//! inputs' sha256 unchanged and nothing written outside the output folder.

use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};

fn demo(name: &str) -> PathBuf {
    [env!("CARGO_MANIFEST_DIR"), "..", "..", "demo-data", name].iter().collect()
}

/// A scratch folder holding copies of the demo inputs.
struct Scratch {
    dir: tempfile::TempDir,
}

impl Scratch {
    fn new() -> Scratch {
        let dir = tempfile::tempdir().expect("tempdir");
        for f in ["app_daily.csv", "regions_weekly.csv", "events.csv", "exposures.csv"] {
            std::fs::copy(demo(f), dir.path().join(f)).expect("copy");
        }
        // a small unit table: 400 rows of the loyalty data
        let members = std::fs::read_to_string(demo("members.csv")).expect("members");
        let head: Vec<&str> = members.lines().take(401).collect();
        std::fs::write(dir.path().join("members.csv"), head.join("\n") + "\n").expect("write");
        Scratch { dir }
    }
    fn p(&self, name: &str) -> PathBuf {
        self.dir.path().join(name)
    }
    fn s(&self, name: &str) -> String {
        self.p(name).to_string_lossy().into_owned()
    }
}

fn sha(path: &Path) -> Vec<u8> {
    // the bytes themselves: equal bytes, equal sha256
    std::fs::read(path).expect("read input")
}

fn run(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_aftercast")).args(args).output().expect("run")
}

/// Exit code as expected, a one-line message, no panic text.
fn assert_refused(out: &Output, code: i32, needles: &[&str]) {
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(code), "stderr: {err}");
    assert!(!err.contains("panicked") && !err.contains("internal error") && !err.contains("backtrace"), "{err}");
    assert!(err.trim_end().lines().count() <= 1, "one line: {err}");
    for n in needles {
        assert!(err.contains(n), "{err} lacks {n}");
    }
}

fn forecast_base(s: &Scratch) -> Vec<String> {
    ["forecast", "--data", &s.s("app_daily.csv"), "--time", "date", "--outcome", "app_orders", "--start", "2026-03-02"]
        .iter()
        .chain(["--model", "harmonic", "--folds", "0"].iter())
        .map(|x| x.to_string())
        .collect()
}

fn forecast_args(s: &Scratch) -> Vec<String> {
    with(&forecast_base(s), &["--draws", "50"])
}

fn owned(v: &[&str]) -> Vec<String> {
    v.iter().map(|x| x.to_string()).collect()
}

fn with(base: &[String], more: &[&str]) -> Vec<String> {
    base.iter().cloned().chain(more.iter().map(|x| x.to_string())).collect()
}

fn run_v(args: &[String]) -> Output {
    let refs: Vec<&str> = args.iter().map(String::as_str).collect();
    run(&refs)
}

/// `windows` on the demo's event log (customers, their first exposure, 28-day order sums).
fn windows_args(s: &Scratch, events: &str) -> Vec<String> {
    owned(&[
        "windows",
        "--events",
        events,
        "--exposures",
        &s.s("exposures.csv"),
        "--unit",
        "customer_id",
        "--exposure",
        "exposed_at",
        "--launch",
        "2026-03-02T09:00:00Z",
        "--event-columns",
        "customer_id,ts,metric,value",
        "--window",
        "28d",
        "--metric",
        "order=sum",
        "--until",
        "2026-04-20T00:00:00Z",
    ])
}

#[test]
fn issue_14_case_1_an_output_never_replaces_an_input() {
    let s = Scratch::new();
    let before = sha(&s.p("app_daily.csv"));
    let f = forecast_args(&s);
    assert_refused(&run_v(&with(&f, &["--json", &s.s("app_daily.csv")])), 2, &["refusing to write over an input"]);
    // through a symbolic link
    std::os::unix::fs::symlink(s.p("app_daily.csv"), s.p("link.json")).expect("symlink");
    assert_refused(&run_v(&with(&f, &["--json", &s.s("link.json")])), 2, &["refusing to write over an input"]);
    assert_eq!(sha(&s.p("app_daily.csv")), before);
    // match --json onto its data
    let m = run(&[
        "match",
        "--data",
        &s.s("members.csv"),
        "--treatment",
        "joined",
        "--outcome",
        "spend_90d",
        "--covariates",
        "spend_pre,visits_pre",
        "--json",
        &s.s("members.csv"),
    ]);
    assert_refused(&m, 2, &["refusing to write over an input"]);
    // windows --output onto the event log, --sidecar onto the exposures
    let ev = sha(&s.p("events.csv"));
    let ex = sha(&s.p("exposures.csv"));
    for (flag, target) in [("--output", "events.csv"), ("--sidecar", "exposures.csv")] {
        let mut args = windows_args(&s, &s.s("events.csv"));
        if flag == "--sidecar" {
            args.extend(["--output".into(), s.s("units.csv")]);
        }
        args.extend([flag.to_string(), s.s(target)]);
        let out = run_v(&args);
        assert_eq!(out.status.code(), Some(2), "{flag}: {}", String::from_utf8_lossy(&out.stderr));
    }
    assert_eq!(sha(&s.p("events.csv")), ev);
    assert_eq!(sha(&s.p("exposures.csv")), ex);
}

#[test]
fn issue_14_case_1_a_study_never_writes_outside_its_output_folder() {
    let s = Scratch::new();
    std::fs::write(s.p("precious.txt"), b"keep me").expect("write");
    let study = "title = \"t\"\n[[analysis]]\nname = \"b\"\nverb = \"plan forecast\"\n[analysis.flags]\ndata = \"app_daily.csv\"\ntime = \"date\"\noutcome = \"app_orders\"\nstart = \"2026-03-02\"\npartial = \"../precious.txt\"\n";
    std::fs::write(s.p("study.toml"), study).expect("study");
    let out = run(&["run", &s.s("study.toml"), "--out", &s.s("out")]);
    assert_refused(&out, 2, &["study.toml", "'partial'", "inside the output folder"]);
    assert_eq!(std::fs::read(s.p("precious.txt")).expect("read"), b"keep me");
    assert!(!s.p("out").exists(), "a failed run leaves no output folder behind");
}

#[test]
fn issue_14_case_2_requests_beyond_memory_are_refused_with_the_largest_value_that_fits() {
    let s = Scratch::new();
    let plasmode = |n: &str| {
        run(&[
            "compare",
            "--plasmode",
            &s.s("members.csv"),
            "--treatment",
            "joined",
            "--outcome",
            "spend_90d",
            "--covariates",
            "spend_pre",
            "--replicates",
            n,
        ])
    };
    for n in ["1000000000000", "18446744073709551615"] {
        assert_refused(&plasmode(n), 2, &["--replicates", "at most"]);
    }
    // --draws far beyond memory on a long post-period
    let f = forecast_base(&s);
    assert_refused(&run_v(&with(&f, &["--draws", "10000000"])), 2, &["--draws", "at most"]);
    // a mistyped far-away date under --gaps fill
    let mut text = std::fs::read_to_string(s.p("app_daily.csv")).expect("read");
    text.push_str("9999-12-31,1,1,1,1\n");
    std::fs::write(s.p("typo.csv"), text).expect("write");
    let out = run(&[
        "forecast",
        "--data",
        &s.s("typo.csv"),
        "--time",
        "date",
        "--outcome",
        "app_orders",
        "--start",
        "2026-03-02",
        "--gaps",
        "fill",
    ]);
    assert_refused(&out, 2, &["typo.csv", "9999-12-31", "mistyped"]);
}

#[test]
fn issue_14_case_3_a_closed_stdout_ends_quietly_after_the_files_are_written() {
    let s = Scratch::new();
    let out_dir = s.p("out");
    let mut child = Command::new(env!("CARGO_BIN_EXE_aftercast"))
        .args(with(&forecast_args(&s), &["--out", &out_dir.to_string_lossy()]))
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("spawn");
    drop(child.stdout.take()); // the reader goes away at once (as `| head -0` would)
    let out = child.wait_with_output().expect("wait");
    assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stderr));
    assert!(out_dir.join("result.json").is_file() && out_dir.join("report.html").is_file());
    // stdout on a full device
    if Path::new("/dev/full").exists() {
        let full = std::fs::OpenOptions::new().write(true).open("/dev/full").expect("/dev/full");
        let out =
            Command::new(env!("CARGO_BIN_EXE_aftercast")).args(forecast_args(&s)).stdout(full).output().expect("run");
        assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stderr));
    }
}

/// The demo's regional panel, Fallowmere treated, predictor-matching synthetic control.
fn synthetic_predictors(s: &Scratch) -> Vec<String> {
    owned(&[
        "synthetic",
        "--data",
        &s.s("regions_weekly.csv"),
        "--unit",
        "region",
        "--time",
        "week",
        "--outcome",
        "revenue",
        "--treated",
        "Fallowmere",
        "--start",
        "2026-04-06",
        "--method",
        "predictors",
    ])
}

#[test]
fn issue_14_case_4_a_solver_tolerance_is_not_blamed_on_the_input() {
    let s = Scratch::new();
    let out = run_v(&with(
        &synthetic_predictors(&s),
        &["--predictors", "store_count,population_k", "--no-robustness", "--quiet"],
    ));
    assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stderr));
}

#[test]
fn issue_14_case_5_links_devices_and_folders_are_never_written_through() {
    let s = Scratch::new();
    let f = forecast_args(&s);
    std::fs::write(s.p("elsewhere.txt"), b"x").expect("write");
    std::os::unix::fs::symlink(s.p("elsewhere.txt"), s.p("out.json")).expect("symlink");
    assert_refused(&run_v(&with(&f, &["--json", &s.s("out.json")])), 2, &["symbolic link"]);
    assert_eq!(std::fs::read(s.p("elsewhere.txt")).expect("read"), b"x");
    assert_refused(&run_v(&with(&f, &["--json", "/dev/null"])), 2, &["device"]);
    std::fs::create_dir(s.p("folder")).expect("mkdir");
    assert_refused(&run_v(&with(&f, &["--json", &s.s("folder")])), 2, &["folder"]);
}

#[test]
fn issue_14_case_6_user_errors_exit_2() {
    let s = Scratch::new();
    let w = |events: &str| run_v(&with(&windows_args(&s, events), &["--output", &s.s("u.csv")]));
    assert_refused(&w(&s.s("missing.csv")), 2, &["missing.csv"]);
    assert_refused(&w(s.dir.path().to_str().expect("utf-8")), 2, &["folder"]);
    let f = forecast_args(&s);
    std::fs::write(s.p("plain"), b"x").expect("write");
    assert_refused(&run_v(&with(&f, &["--json", &s.s("plain/r.json")])), 2, &["cannot write"]);
    let long = s.s(&format!("{}.json", "n".repeat(300)));
    assert_refused(&run_v(&with(&f, &["--json", &long])), 2, &["too long"]);
}

#[test]
fn issue_14_case_7_runs_that_would_not_end_are_refused_at_once() {
    let s = Scratch::new();
    let out = run_v(&with(&synthetic_predictors(&s), &["--outcome-blocks", "100"]));
    assert_refused(&out, 2, &["--outcome-blocks"]);
    // a categorical with a level per unit, and exact matching on an amount
    let text = std::fs::read_to_string(s.p("members.csv")).expect("read");
    let mut lines = text.lines();
    let header = lines.next().expect("header");
    let mut with_id = format!("{header},code\n");
    for (i, l) in lines.enumerate() {
        with_id.push_str(&format!("{l},c{i}\n"));
    }
    std::fs::write(s.p("coded.csv"), with_id).expect("write");
    let m = |extra: &[&str]| {
        let mut a = vec!["match", "--data", "", "--treatment", "joined", "--outcome", "spend_90d"];
        let data = s.s("coded.csv");
        a[2] = &data;
        a.extend_from_slice(extra);
        run(&a)
    };
    assert_refused(&m(&["--covariates", "spend_pre,code", "--categorical", "code"]), 2, &["code", "levels"]);
    assert_refused(&m(&["--covariates", "visits_pre", "--exact", "spend_pre"]), 2, &["--exact", "distinct values"]);
    // a device is not an input file
    assert_refused(
        &run(&["forecast", "--data", "/dev/zero", "--time", "date", "--outcome", "y", "--start", "2026-03-02"]),
        2,
        &["/dev/zero", "not a regular file"],
    );
}

#[test]
fn issue_14_case_8_degenerate_data_gets_no_confident_verdict() {
    let s = Scratch::new();
    let mut zero = String::from("date,y\n");
    for d in 0..200 {
        let day = chrono::NaiveDate::from_ymd_opt(2025, 1, 1).expect("date") + chrono::Duration::days(d);
        zero.push_str(&format!("{day},0\n"));
    }
    std::fs::write(s.p("zero.csv"), zero).expect("write");
    let out =
        run(&["forecast", "--data", &s.s("zero.csv"), "--time", "date", "--outcome", "y", "--start", "2025-06-01"]);
    assert_refused(&out, 2, &["constant"]);
    // one treated unit
    let text = std::fs::read_to_string(s.p("members.csv")).expect("read");
    let mut lines = text.lines();
    let header = lines.next().expect("header").to_string();
    let cols: Vec<&str> = header.split(',').collect();
    let t = cols.iter().position(|c| *c == "joined").expect("joined column");
    let mut one = header.clone() + "\n";
    let mut seen = false;
    for l in lines {
        let mut cells: Vec<String> = l.split(',').map(str::to_string).collect();
        if cells[t] == "1" {
            if seen {
                cells[t] = "0".into();
            }
            seen = true;
        }
        one.push_str(&(cells.join(",") + "\n"));
    }
    std::fs::write(s.p("one.csv"), one).expect("write");
    let out = run(&[
        "match",
        "--data",
        &s.s("one.csv"),
        "--treatment",
        "joined",
        "--outcome",
        "spend_90d",
        "--covariates",
        "spend_pre",
    ]);
    assert_refused(&out, 2, &["1 treated units", "need at least 2"]);
    let f = forecast_args(&s);
    assert_refused(&run_v(&with(&f, &["--threshold", "NaN"])), 2, &["--threshold"]);
}

#[test]
fn issue_14_case_9_messages_are_short_and_escaped() {
    let s = Scratch::new();
    let mut text = String::from("date,y\n2025-01-01,1\n2025-01-02,");
    text.push_str(&"9".repeat(1000));
    text.push_str("x\x1b[31mred\n");
    std::fs::write(s.p("cell.csv"), text).expect("write");
    let out =
        run(&["forecast", "--data", &s.s("cell.csv"), "--time", "date", "--outcome", "y", "--start", "2025-01-02"]);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_refused(&out, 2, &["cell.csv", "line 3"]);
    assert!(err.len() < 400, "the cell is cut: {} characters", err.len());
    assert!(!err.contains('\x1b'), "escape sequences are escaped: {err}");
}

#[test]
fn issue_14_case_10_outputs_are_ordinary_complete_and_not_stale() {
    use std::os::unix::fs::PermissionsExt;
    let s = Scratch::new();
    let out_dir = s.p("out");
    let o = out_dir.to_string_lossy().into_owned();
    let f = forecast_args(&s);
    let first = run_v(&with(&f, &["--out", &o, "--quiet"]));
    assert_eq!(first.status.code(), Some(0), "{}", String::from_utf8_lossy(&first.stderr));
    let mode = std::fs::metadata(out_dir.join("result.json")).expect("meta").permissions().mode() & 0o777;
    assert!(mode & 0o004 != 0 || mode & 0o040 != 0, "readable beyond the owner under a usual umask: {mode:o}");
    // --force removes what an earlier run wrote (a stale chart) before writing anew
    std::fs::write(out_dir.join("charts").join("old-view.png"), b"stale").expect("write");
    std::fs::write(out_dir.join(".aftercast-killed.tmp"), b"left by a kill").expect("write");
    let again = run_v(&with(&f, &["--out", &o, "--force", "--quiet"]));
    assert_eq!(again.status.code(), Some(0), "{}", String::from_utf8_lossy(&again.stderr));
    assert!(!out_dir.join("charts").join("old-view.png").exists(), "stale chart removed");
    assert!(!out_dir.join(".aftercast-killed.tmp").exists(), "stale temporary removed");
    // a failed run leaves no empty folder
    let bad = s.p("never");
    let out = run_v(&with(&f, &["--out", &bad.to_string_lossy(), "--season", "1"]));
    assert_eq!(out.status.code(), Some(2));
    assert!(!bad.exists(), "no folder left behind by a failed run");
}

#[test]
fn issue_14_case_10_ctrl_c_on_a_backtest_exits_130_and_keeps_what_is_done() {
    let s = Scratch::new();
    let partial = s.p("partial.jsonl");
    let child = Command::new(env!("CARGO_BIN_EXE_aftercast"))
        .args([
            "plan",
            "forecast",
            "--data",
            &s.s("app_daily.csv"),
            "--time",
            "date",
            "--outcome",
            "app_orders",
            "--start",
            "2026-03-02",
            "--trend",
            "level",
            "--season",
            "7",
            "--placebos",
            "400",
            "--threads",
            "1",
            "--partial",
            &partial.to_string_lossy(),
            "--quiet",
        ])
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("spawn");
    // wait until the first placebo date is written, then interrupt
    for _ in 0..600 {
        if std::fs::read_to_string(&partial).is_ok_and(|t| t.contains("\"origin\"")) {
            break;
        }
        std::thread::sleep(std::time::Duration::from_millis(100));
    }
    let kill = Command::new("kill").args(["-INT", &child.id().to_string()]).status().expect("kill");
    assert!(kill.success());
    let out = child.wait_with_output().expect("wait");
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(130), "{err}");
    assert!(err.contains("interrupted") && err.contains("partial.jsonl"), "{err}");
    assert!(std::fs::read_to_string(&partial).expect("partial").contains("\"origin\""));
}
