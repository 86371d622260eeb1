//! The bad-input corpus: every malformed file under tests/bad-input/ goes through the real
//! binary, which must exit with code 2, name the file, line and column where one applies, quote
//! the offending text, and never panic.

use std::path::PathBuf;
use std::process::Command;

fn corpus(name: &str) -> String {
    let p: PathBuf = [env!("CARGO_MANIFEST_DIR"), "..", "..", "tests", "bad-input", name].iter().collect();
    p.to_string_lossy().into_owned()
}

struct Case {
    file: &'static str,
    args: &'static [&'static str],
    expect: &'static [&'static str],
}

const SERIES: &[&str] = &["--shape", "series", "--time", "date", "--outcome", "y"];
const PANEL: &[&str] = &["--shape", "panel", "--unit", "region", "--time", "week", "--outcome", "revenue"];
const UNITS: &[&str] =
    &["--shape", "units", "--id", "id", "--treatment", "treat", "--covariates", "age", "--outcome", "y"];

fn cases() -> Vec<Case> {
    vec![
        Case { file: "empty.csv", args: SERIES, expect: &["empty.csv", "the file is empty"] },
        Case { file: "blank_lines.csv", args: SERIES, expect: &["blank_lines.csv", "the file is empty"] },
        Case { file: "header_only.csv", args: SERIES, expect: &["header but no data rows"] },
        Case { file: "missing_column.csv", args: SERIES, expect: &["no column named 'y'", "date, orders"] },
        Case { file: "bad_number.csv", args: SERIES, expect: &["line 6, column 2 ('y')", "'12a' is not a number"] },
        Case {
            file: "nan_value.csv",
            args: SERIES,
            expect: &["line 4, column 2 ('y')", "'NaN' is not a finite number"],
        },
        Case {
            file: "infinite_value.csv",
            args: SERIES,
            expect: &["line 9, column 2 ('y')", "'-inf' is not a finite number"],
        },
        Case {
            file: "bad_date.csv",
            args: SERIES,
            expect: &["line 5, column 1 ('date')", "'2024/01/04' is not a date", "ISO 8601"],
        },
        Case {
            file: "impossible_date.csv",
            args: SERIES,
            expect: &["line 7, column 1 ('date')", "'2024-01-32' is not a date"],
        },
        Case {
            file: "duplicate_date.csv",
            args: SERIES,
            expect: &["line 8, column 1", "duplicate time '2024-01-06'", "first seen on line 7"],
        },
        Case {
            file: "out_of_order.csv",
            args: SERIES,
            expect: &["line 6, column 1", "'2024-01-04' comes before", "'2024-01-05'"],
        },
        Case {
            file: "gap_in_days.csv",
            args: SERIES,
            expect: &["line 7, column 1", "1 daily period(s) missing", "--gaps fill"],
        },
        Case {
            file: "irregular_weeks.csv",
            args: SERIES,
            expect: &["line 5, column 1", "'2024-01-23'", "not on the weekly grid"],
        },
        Case { file: "ragged_row.csv", args: SERIES, expect: &["line 4", "row has 3 fields, the header has 2"] },
        Case { file: "missing_value.csv", args: SERIES, expect: &["line 10, column 2 ('y')", "value is missing"] },
        Case {
            file: "mixed_time_kinds.csv",
            args: SERIES,
            expect: &["line 6, column 1", "mixes dates and integer periods"],
        },
        Case { file: "duplicate_header.csv", args: SERIES, expect: &["line 1, column 3", "'y' appears twice"] },
        Case { file: "empty_header_cell.csv", args: SERIES, expect: &["line 1, column 3", "header cell is empty"] },
        Case {
            file: "control_missing.csv",
            args: &["--shape", "series", "--time", "date", "--outcome", "y", "--controls", "ctrl"],
            expect: &["line 8, column 3 ('ctrl')", "value is missing"],
        },
        Case { file: "not_utf8.csv", args: SERIES, expect: &["line 3", "not valid UTF-8"] },
        Case { file: "missing_date.csv", args: SERIES, expect: &["line 4, column 1 ('date')", "the date is missing"] },
        Case { file: "day_first_dates.csv", args: SERIES, expect: &["line 2, column 1", "'01/01/2024' is not a date"] },
        Case {
            file: "bad_date.csv",
            args: &["--shape", "series", "--time", "date", "--outcome", "y", "--date-format", "%d/%m/%Y"],
            expect: &["line 2, column 1", "'2024-01-01' is not a date in the given format '%d/%m/%Y'"],
        },
        Case {
            file: "short_pre_period.csv",
            args: &["--shape", "series", "--time", "date", "--outcome", "y", "--start", "2024-01-02"],
            expect: &["short_pre_period.csv", "only 1 pre-period observations before 2024-01-02", "at least 3"],
        },
        Case {
            file: "short_pre_period.csv",
            args: &["--shape", "series", "--time", "date", "--outcome", "y", "--start", "2025-01-01"],
            expect: &["no observations in the post-period from 2025-01-01"],
        },
        Case {
            file: "short_pre_period.csv",
            args: &["--shape", "series", "--time", "date", "--outcome", "y", "--start", "2024"],
            expect: &["invalid --start: '2024'", "holds dates"],
        },
        Case {
            file: "panel_duplicate.csv",
            args: PANEL,
            expect: &["line 14, column 2", "duplicate unit and period 'south / 2024-01-08'", "first seen on line 7"],
        },
        Case { file: "panel_unbalanced.csv", args: PANEL, expect: &["unit 'east' has no row for period '2024-01-15'"] },
        Case {
            file: "panel_bad_number.csv",
            args: PANEL,
            expect: &["line 7, column 3 ('revenue')", "'lots' is not a number"],
        },
        Case {
            file: "panel_missing_unit.csv",
            args: PANEL,
            expect: &["line 9, column 1 ('region')", "value is missing"],
        },
        Case {
            file: "panel_treated_absent.csv",
            args: &[
                "--shape",
                "panel",
                "--unit",
                "region",
                "--time",
                "week",
                "--outcome",
                "revenue",
                "--treated",
                "north,west",
            ],
            expect: &["treated unit 'west' is not in column 'region'"],
        },
        Case { file: "units_constant_treatment.csv", args: UNITS, expect: &["column 'treat' has only the value"] },
        Case {
            file: "units_bad_treatment.csv",
            args: UNITS,
            expect: &["line 6, column 2 ('treat')", "'maybe' is not a treatment value"],
        },
        Case {
            file: "units_duplicate_id.csv",
            args: UNITS,
            expect: &["line 11, column 1 ('id')", "duplicate unit id 'c3'", "first seen on line 5"],
        },
        Case {
            file: "units_nan_covariate.csv",
            args: UNITS,
            expect: &["line 4, column 3 ('age')", "'nan' is not a finite number"],
        },
        Case { file: "units_no_treatment_column.csv", args: UNITS, expect: &["no column named 'treat'"] },
        Case {
            file: "units_missing_covariate.csv",
            args: UNITS,
            expect: &["line 12, column 3 ('age')", "value is missing"],
        },
        Case { file: "corrupt.parquet", args: SERIES, expect: &["corrupt.parquet", "malformed Parquet input"] },
        Case { file: "empty.parquet", args: SERIES, expect: &["empty.parquet", "the file is empty"] },
        Case { file: "does_not_exist.csv", args: SERIES, expect: &["does_not_exist.csv", "cannot read file"] },
    ]
}

/// Owned arguments from string slices.
fn owned(args: &[&str]) -> Vec<String> {
    args.iter().map(|s| s.to_string()).collect()
}

fn run(args: &[String]) -> (Option<i32>, String, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_aftercast")).args(args).output().expect("run aftercast");
    (
        out.status.code(),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

#[test]
fn every_malformed_file_exits_2_with_a_located_message() {
    let cases = cases();
    assert!(cases.len() >= 25, "the corpus must hold at least 25 cases");
    let mut failures = Vec::new();
    for c in &cases {
        let mut args = vec!["inspect".to_string(), "--data".to_string(), corpus(c.file)];
        args.extend(owned(c.args));
        let (code, _out, err) = run(&args);
        let ok = code == Some(2)
            && err.starts_with("aftercast: error: ")
            && !err.contains("panicked")
            && c.expect.iter().all(|e| err.contains(e));
        if !ok {
            failures.push(format!("{} {:?}: exit {code:?}, stderr: {err}", c.file, c.args));
        }
    }
    assert!(failures.is_empty(), "bad-input cases failed:\n{}", failures.join("\n"));
}

#[test]
fn a_folder_given_as_data_is_bad_input() {
    let dir = corpus("");
    let (code, _, err) = run(&["inspect".into(), "--data".into(), dir]);
    assert_eq!(code, Some(2), "{err}");
    assert!(err.contains("cannot read file"), "{err}");
}

#[test]
fn usage_errors_exit_2() {
    let (code, _, _) = run(&["inspect".into(), "--no-such-flag".into()]);
    assert_eq!(code, Some(2));
    // a plan's bootstrap draws per run take the analysis's own range (at least 50)
    let members = format!("{}/../../demo-data/members.csv", env!("CARGO_MANIFEST_DIR"));
    let plan = ["plan", "match", "--data", &members, "--treatment", "joined", "--outcome", "spend_90d"];
    let (code, _, err) = run(&owned(&[&plan[..], &["--covariates", "spend_pre", "--run-draws", "40"]].concat()));
    assert_eq!(code, Some(2), "{err}");
    assert!(err.contains("--run-draws") && err.contains("50"), "{err}");
    let (code, _, _) = run(&["no-such-verb".into()]);
    assert_eq!(code, Some(2));
}

#[test]
fn good_files_still_read_with_the_lenient_policies() {
    // The same gap file reads when the gap policy allows filling, and the missing value when
    // the missing-value policy keeps it: the corpus errors come from the policies, not the reader.
    let (code, out, err) = run(&[
        "inspect".into(),
        "--data".into(),
        corpus("gap_in_days.csv"),
        "--shape".into(),
        "series".into(),
        "--time".into(),
        "date".into(),
        "--outcome".into(),
        "y".into(),
        "--gaps".into(),
        "fill".into(),
    ]);
    assert_eq!(code, Some(0), "{err}");
    assert!(out.contains("10 Daily periods") && out.contains("1 missing"), "{out}");
    let (code, out, err) = run(&[
        "inspect".into(),
        "--data".into(),
        corpus("missing_value.csv"),
        "--shape".into(),
        "series".into(),
        "--time".into(),
        "date".into(),
        "--outcome".into(),
        "y".into(),
        "--missing".into(),
        "keep".into(),
    ]);
    assert_eq!(code, Some(0), "{err}");
    assert!(out.contains("10 Daily periods") && out.contains("1 missing"), "{out}");
}

/// The forecast's model options: an unknown value is a one-line usage error (exit 2), and
/// `--model auto` without a backtest (`--folds 0`) is refused rather than silently given one.
#[test]
fn forecast_option_errors_exit_2() {
    let nile = concat!(env!("CARGO_MANIFEST_DIR"), "/../aftercast-forecast/tests/data/nile.csv");
    let base = ["forecast", "--data", nile, "--time", "year", "--outcome", "volume", "--start", "1899"];
    for (extra, expect) in [
        (vec!["--trend", "wobbly"], "wobbly"),
        (vec!["--ar", "maybe"], "maybe"),
        (vec!["--shrink-controls", "3"], "'3'"),
        (vec!["--model", "auto", "--folds", "0"], "--folds 1 or more"),
        (vec!["--season", "50"], "longer than the pre-period (28 periods)"),
        // the outcome as its own control would explain any effect away
        (vec!["--controls", "volume"], "'volume' is the outcome"),
        (vec!["--controls", "year"], "'year' is the time column"),
        (vec!["--draws=-5"], "not a whole number"),
    ] {
        let mut args = owned(&base);
        args.extend(owned(&extra));
        let (code, _, err) = run(&args);
        assert_eq!(code, Some(2), "{extra:?}: {err}");
        assert_eq!(err.trim_end().lines().count(), 1, "{extra:?}: one line expected: {err}");
        assert!(err.contains(expect) && !err.contains("panicked"), "{extra:?}: {err}");
    }
}

/// Values too large to compute with (found by scripts/fuzz.py): an outcome near 1e308 in a
/// synthetic-control panel, and a season period of 1e308, are bad input (exit 2, one line that
/// names the unit and period or the flag), not internal errors.
#[test]
fn huge_values_are_bad_input() {
    let dir = std::env::temp_dir().join(format!("aftercast-huge-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let mut panel = String::from("region,week,revenue\n");
    for (u, unit) in ["ash", "birch", "cedar", "elm", "fir", "oak"].iter().enumerate() {
        for w in 0..20 {
            let day = chrono::NaiveDate::from_ymd_opt(2024, 1, 1).unwrap() + chrono::Duration::weeks(w);
            let v =
                if *unit == "elm" && w == 7 { 1e300 } else { 100.0 + u as f64 * 10.0 + (w as f64 * 0.7).sin() * 5.0 };
            panel.push_str(&format!("{unit},{day},{v}\n"));
        }
    }
    let path = dir.join("panel.csv");
    std::fs::write(&path, panel).unwrap();
    let args = owned(&[
        "synthetic",
        "--data",
        path.to_str().unwrap(),
        "--unit",
        "region",
        "--time",
        "week",
        "--outcome",
        "revenue",
        "--treated",
        "ash",
        "--start",
        "2024-04-15",
        "--json",
        dir.join("out.json").to_str().unwrap(),
    ]);
    let (code, _, err) = run(&args);
    assert_eq!(code, Some(2), "{err}");
    assert!(err.contains("unit 'elm'") && err.contains("too large to compute with"), "{err}");
    let nile = concat!(env!("CARGO_MANIFEST_DIR"), "/../aftercast-forecast/tests/data/nile.csv");
    let args = owned(&[
        "forecast",
        "--data",
        nile,
        "--time",
        "year",
        "--outcome",
        "volume",
        "--start",
        "1899",
        "--season",
        "1e308",
    ]);
    let (code, _, err) = run(&args);
    assert_eq!(code, Some(2), "{err}");
    assert!(err.contains("1e308") && err.trim_end().lines().count() == 1, "{err}");
    let _ = std::fs::remove_dir_all(&dir);
}

/// A usage error shows the offending value as every error shows user text (found by
/// scripts/fuzz.py): control and bidirectional characters escaped, cut to 80 characters.
#[test]
fn usage_errors_show_values_escaped_and_cut() {
    let base = ["forecast", "--data", "x.csv", "--time", "t", "--outcome", "y", "--start", "1", "--ar"];
    for value in ["\u{202e}evil", &"x".repeat(300)] {
        let mut args = owned(&base);
        args.push(value.to_string());
        let (code, _, err) = run(&args);
        assert_eq!(code, Some(2), "{err}");
        assert_eq!(err.trim_end().lines().count(), 1, "{err}");
        assert!(!err.contains('\u{202e}') && err.len() < 400, "{err}");
    }
}
