//! Tests of the invented demo scenario (`demo-data/`, generator in this crate's `src/`).
//!
//! The scenario is regenerated once per test run into a scratch folder; every test reads the
//! regenerated files like a user would (plain CSV text) and re-computes the true effects that
//! `ScenarioTruth` states, so neither the files nor the README can drift from the generator.

use aftercast_demo as demo;
use chrono::{Datelike, Duration, NaiveDate, NaiveDateTime, Weekday};
use std::collections::{BTreeMap, HashMap, HashSet};
use std::path::{Path, PathBuf};
use std::sync::OnceLock;

/// Tolerances of this file, in one place.
mod tol {
    /// Sums of cents converted to dollars and divided: exact up to float rounding.
    pub const CENTS: f64 = 1e-9;
    /// A ratio of two amounts each rounded to the cent, of at least $10,000.
    pub const RATIO_OF_ROUNDED: f64 = 1e-5;
    /// Largest committed file, bytes (keep the repository small).
    pub const MAX_FILE_BYTES: u64 = 5_000_000;
}

struct Generated {
    dir: PathBuf,
    truth: demo::ScenarioTruth,
}

fn generated() -> &'static Generated {
    static CELL: OnceLock<Generated> = OnceLock::new();
    CELL.get_or_init(|| {
        let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join("demo-data-regenerated");
        if dir.exists() {
            std::fs::remove_dir_all(&dir).expect("clearing the scratch folder");
        }
        let truth = demo::write_scenario(&dir).expect("generating the demo");
        Generated { dir, truth }
    })
}

fn committed_dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../../demo-data")
}

/// Reads a generated CSV file: header and rows of fields (the demo files never quote).
fn read_csv(rel: &str) -> (Vec<String>, Vec<Vec<String>>) {
    let text = std::fs::read_to_string(generated().dir.join(rel)).expect("reading a demo file");
    let mut lines = text.lines();
    let header: Vec<String> = lines.next().expect("a header").split(',').map(str::to_string).collect();
    let rows: Vec<Vec<String>> = lines.map(|l| l.split(',').map(str::to_string).collect()).collect();
    for (i, r) in rows.iter().enumerate() {
        assert_eq!(r.len(), header.len(), "{rel} row {} has a wrong field count", i + 2);
    }
    (header, rows)
}

fn col(header: &[String], name: &str) -> usize {
    header.iter().position(|h| h == name).unwrap_or_else(|| panic!("column {name} missing"))
}

fn num(s: &str) -> f64 {
    s.parse().unwrap_or_else(|_| panic!("not a number: {s}"))
}

/// Dollars with exactly two decimals, as integer cents.
fn cents(s: &str) -> i64 {
    let (whole, frac) = s.split_once('.').unwrap_or_else(|| panic!("no decimals: {s}"));
    assert_eq!(frac.len(), 2, "amount {s} must have two decimals");
    let w: i64 = whole.parse().expect("whole dollars");
    let f: i64 = frac.parse().expect("cents");
    w * 100 + if w < 0 { -f } else { f }
}

fn date(s: &str) -> NaiveDate {
    NaiveDate::parse_from_str(s, "%Y-%m-%d").unwrap_or_else(|_| panic!("not an ISO date: {s}"))
}

fn ts(s: &str) -> i64 {
    NaiveDateTime::parse_from_str(s, "%Y-%m-%dT%H:%M:%SZ")
        .unwrap_or_else(|_| panic!("not an ISO UTC timestamp: {s}"))
        .and_utc()
        .timestamp()
}

fn mean(v: &[f64]) -> f64 {
    v.iter().sum::<f64>() / v.len() as f64
}

fn corr(x: &[f64], y: &[f64]) -> f64 {
    let (mx, my) = (mean(x), mean(y));
    let sxy: f64 = x.iter().zip(y).map(|(a, b)| (a - mx) * (b - my)).sum();
    let sxx: f64 = x.iter().map(|a| (a - mx).powi(2)).sum();
    let syy: f64 = y.iter().map(|b| (b - my).powi(2)).sum();
    sxy / (sxx * syy).sqrt()
}

/// With `AFTERCAST_REGENERATE_DEMO_DATA=1` the regenerated files replace the committed ones
/// (after a deliberate change to the generator); otherwise they must be identical.
#[test]
fn regenerated_files_equal_the_committed_files() {
    let g = generated();
    let mut names: Vec<String> = g.truth.files.iter().map(|f| f.path.clone()).collect();
    names.push("README.md".to_string());
    let bless = std::env::var("AFTERCAST_REGENERATE_DEMO_DATA").is_ok_and(|v| v == "1");
    for name in names {
        let new = std::fs::read(g.dir.join(&name)).expect("reading a regenerated file");
        let target = committed_dir().join(&name);
        if bless {
            std::fs::create_dir_all(target.parent().expect("a parent")).expect("creating demo-data");
            std::fs::write(&target, &new).expect("writing demo-data");
            continue;
        }
        let old = std::fs::read(&target).unwrap_or_else(|_| {
            panic!("demo-data/{name} is missing; regenerate with AFTERCAST_REGENERATE_DEMO_DATA=1")
        });
        assert!(
            new == old,
            "demo-data/{name} differs from the generator's output; after a deliberate change \
             regenerate with AFTERCAST_REGENERATE_DEMO_DATA=1 and commit"
        );
    }
}

#[test]
fn two_generations_write_identical_bytes() {
    let g = generated();
    let other = Path::new(env!("CARGO_TARGET_TMPDIR")).join("demo-data-second");
    if other.exists() {
        std::fs::remove_dir_all(&other).expect("clearing");
    }
    let t = demo::write_scenario(&other).expect("second generation");
    assert_eq!(serde_json::to_string(&t).expect("json"), serde_json::to_string(&g.truth).expect("json"));
    for f in &t.files {
        let a = std::fs::read(g.dir.join(&f.path)).expect("first");
        let b = std::fs::read(other.join(&f.path)).expect("second");
        assert!(a == b, "{} differs between two generations", f.path);
    }
    std::fs::remove_dir_all(&other).expect("cleaning up");
}

#[test]
fn every_file_is_small_and_row_counts_match() {
    let g = generated();
    for f in &g.truth.files {
        let path = g.dir.join(&f.path);
        let len = std::fs::metadata(&path).expect("metadata").len();
        assert!(len < tol::MAX_FILE_BYTES, "{} is {len} bytes", f.path);
        let text = std::fs::read_to_string(&path).expect("text");
        assert_eq!(text.lines().count(), f.rows + 1, "{} row count", f.path);
        assert!(text.ends_with('\n') && !text.contains('\r'), "{} line ends", f.path);
    }
}

#[test]
fn app_lift_schedule_is_the_stated_one() {
    use demo::app::lift;
    assert_eq!(lift(-1), 0.0);
    assert_eq!(lift(0), 0.04);
    assert!((lift(28) - 0.0325).abs() < 1e-15);
    assert!((lift(56) - 0.025).abs() < 1e-15);
    assert_eq!(lift(57), 0.025);
    assert_eq!(lift(120), 0.025);
    // Monotone non-increasing over the decay.
    for k in 0..56 {
        assert!(lift(k + 1) < lift(k));
    }
}

#[test]
fn app_daily_effect_recomputed_from_the_file() {
    let t = &generated().truth.app_launch;
    let (h, rows) = read_csv("app_daily.csv");
    assert_eq!(h, ["date", "app_orders", "app_revenue", "catalogue_orders", "weather_index"]);
    assert_eq!(rows.len(), 1277);
    let first = date("2023-01-01");
    for (i, r) in rows.iter().enumerate() {
        assert_eq!(date(&r[0]), first + Duration::days(i as i64), "dates are daily");
    }
    assert_eq!(rows.last().map(|r| r[0].as_str()), Some("2026-06-30"));
    let launch = date(&t.launch_date);
    assert_eq!(launch, date("2026-03-02"));
    let post: Vec<&Vec<String>> = rows.iter().filter(|r| date(&r[0]) >= launch).collect();
    assert_eq!(post.len(), t.daily.len());
    assert_eq!(post.len(), t.post_days);
    let (mut obs_rev, mut cf_rev, mut obs_ord, mut cf_ord) = (0i64, 0i64, 0i64, 0i64);
    for (k, (r, d)) in post.iter().zip(&t.daily).enumerate() {
        assert_eq!(r[0], d.date);
        let rev = cents(&r[2]);
        let cf = (d.counterfactual_revenue * 100.0).round() as i64;
        let orders: i64 = r[1].parse().expect("orders");
        assert_eq!(orders, d.observed_orders);
        assert_eq!(d.lift, demo::app::lift(k as i64));
        // Observed = counterfactual x (1 + lift), rounded to the cent / whole order.
        assert!((rev as f64 - cf as f64 * (1.0 + d.lift)).abs() <= 0.5 + 1e-6);
        let cfo = d.counterfactual_orders as f64;
        assert!((orders as f64 - cfo * (1.0 + d.lift)).abs() <= 0.5 + 1e-9);
        obs_rev += rev;
        cf_rev += cf;
        obs_ord += orders;
        cf_ord += d.counterfactual_orders;
    }
    let rel = (obs_rev - cf_rev) as f64 / cf_rev as f64;
    assert!((rel - t.revenue.relative_effect).abs() < tol::CENTS);
    assert!(((obs_rev - cf_rev) as f64 / 100.0 - t.revenue.cumulative_effect).abs() < tol::CENTS * 1e3);
    assert!(rel > 0.025 && rel < 0.04, "relative effect {rel}");
    let rel_o = (obs_ord - cf_ord) as f64 / cf_ord as f64;
    assert!((rel_o - t.orders.relative_effect).abs() < tol::CENTS);
    assert!(rel_o > 0.025 && rel_o < 0.04, "relative order effect {rel_o}");
}

#[test]
fn app_controls_move_with_the_outcome_before_the_launch() {
    let (_, rows) = read_csv("app_daily.csv");
    let pre: Vec<&Vec<String>> = rows.iter().filter(|r| date(&r[0]) < date("2026-03-02")).collect();
    let rev: Vec<f64> = pre.iter().map(|r| num(&r[2]).ln()).collect();
    let cat: Vec<f64> = pre.iter().map(|r| num(&r[3]).ln()).collect();
    let weather: Vec<f64> = pre.iter().map(|r| num(&r[4])).collect();
    // the two trends run in opposite directions (app up, catalogue down), so the shared
    // season and market shock show once each series' straight-line trend is removed
    let detrend = |v: &[f64]| -> Vec<f64> {
        let n = v.len() as f64;
        let tm = (n - 1.0) / 2.0;
        let vm = v.iter().sum::<f64>() / n;
        let sxy: f64 = v.iter().enumerate().map(|(t, y)| (t as f64 - tm) * (y - vm)).sum();
        let sxx: f64 = (0..v.len()).map(|t| (t as f64 - tm).powi(2)).sum();
        let b = sxy / sxx;
        v.iter().enumerate().map(|(t, y)| y - vm - b * (t as f64 - tm)).collect()
    };
    let rc = corr(&detrend(&rev), &detrend(&cat));
    let rw = corr(&rev, &weather);
    assert!(rc > 0.5, "app revenue vs catalogue correlation (detrended) {rc}");
    assert!(rw > 0.3, "app revenue vs weather correlation {rw}");
    // Day-to-day noise is a few percent: the median absolute log change is under 10%.
    let mut changes: Vec<f64> = rev.windows(2).map(|w| (w[1] - w[0]).abs()).collect();
    changes.sort_by(f64::total_cmp);
    let med = changes[changes.len() / 2];
    assert!(med > 0.01 && med < 0.10, "median daily log change {med}");
}

#[test]
fn calendar_lists_dated_holidays_in_range() {
    let (h, rows) = read_csv("calendar.csv");
    assert_eq!(h, ["date", "name"]);
    let dates: Vec<NaiveDate> = rows.iter().map(|r| date(&r[0])).collect();
    assert!(dates.windows(2).all(|w| w[0] < w[1]), "sorted, one holiday per date");
    assert!(dates[0] >= date("2023-01-01"));
    assert!(*dates.last().expect("rows") <= date("2026-06-30"));
    let find = |name: &str| -> Vec<NaiveDate> { rows.iter().filter(|r| r[1] == name).map(|r| date(&r[0])).collect() };
    // Western Easter Sundays 2023-04-09, 2024-03-31, 2025-04-20, 2026-04-05 (from memory; they
    // match the Meeus/Jones/Butcher algorithm the generator uses); Good Friday is two days
    // before.
    assert_eq!(find("Good Friday"), [date("2023-04-07"), date("2024-03-29"), date("2025-04-18"), date("2026-04-03")]);
    assert_eq!(find("Easter Monday"), [date("2023-04-10"), date("2024-04-01"), date("2025-04-21"), date("2026-04-06")]);
    for d in find("Early May Bank Holiday").into_iter().chain(find("Spring Bank Holiday")) {
        assert_eq!(d.weekday(), Weekday::Mon);
        assert_eq!(d.month(), 5);
    }
    // The day after the fourth Thursday of November.
    assert_eq!(find("Trailhead Friday"), [date("2023-11-24"), date("2024-11-29"), date("2025-11-28")]);
    assert_eq!(find("Year-End Sale").len(), 3);
}

struct Panel {
    weeks: Vec<NaiveDate>,
    revenue: BTreeMap<String, Vec<i64>>,
}

fn read_panel() -> Panel {
    let (h, rows) = read_csv("regions_weekly.csv");
    assert_eq!(h, ["region", "week", "revenue", "store_count", "population_k"]);
    let mut revenue: BTreeMap<String, Vec<i64>> = BTreeMap::new();
    let mut weeks_of: BTreeMap<String, Vec<NaiveDate>> = BTreeMap::new();
    let mut covariates: HashMap<String, (String, String)> = HashMap::new();
    for r in &rows {
        revenue.entry(r[0].clone()).or_default().push(cents(&r[2]));
        weeks_of.entry(r[0].clone()).or_default().push(date(&r[1]));
        let c = covariates.entry(r[0].clone()).or_insert((r[3].clone(), r[4].clone()));
        assert_eq!(c, &(r[3].clone(), r[4].clone()), "covariates constant per region");
    }
    let weeks = weeks_of.values().next().expect("a region").clone();
    for w in weeks_of.values() {
        assert_eq!(w, &weeks, "every region has the same weeks");
    }
    Panel { weeks, revenue }
}

#[test]
fn regions_panel_has_40_regions_by_156_mondays() {
    let p = read_panel();
    assert_eq!(p.revenue.len(), 40);
    assert_eq!(p.weeks.len(), 156);
    assert!(p.weeks.iter().all(|w| w.weekday() == Weekday::Mon));
    assert!(p.weeks.windows(2).all(|w| w[1] - w[0] == Duration::days(7)));
    assert!(p.revenue.values().flatten().all(|&c| c > 0));
}

#[test]
fn sale_regions_and_weeks_exist_and_effects_recompute() {
    let t = &generated().truth.regional_sale;
    let p = read_panel();
    assert_eq!(t.sale_regions.len(), 6);
    assert_eq!(t.sale_regions.iter().collect::<HashSet<_>>().len(), 6);
    assert_eq!(t.sale_weeks.len(), 4);
    assert_eq!(t.pull_forward_weeks.len(), 2);
    let last = *p.weeks.last().expect("weeks");
    let idx =
        |w: &str| p.weeks.iter().position(|x| *x == date(w)).unwrap_or_else(|| panic!("week {w} not in the panel"));
    let sale_idx: Vec<usize> = t.sale_weeks.iter().map(|w| idx(w)).collect();
    let pull_idx: Vec<usize> = t.pull_forward_weeks.iter().map(|w| idx(w)).collect();
    // Consecutive: 4 sale weeks then the 2 pull-forward weeks, all in the last year.
    let all: Vec<usize> = sale_idx.iter().chain(&pull_idx).copied().collect();
    assert!(all.windows(2).all(|w| w[1] == w[0] + 1));
    assert!(date(&t.sale_weeks[0]) > last - Duration::days(365));
    assert!(*all.last().expect("weeks") < p.weeks.len() - 1, "post weeks remain");
    assert_eq!(t.post_weeks, p.weeks.len() - sale_idx[0]);

    let mut total_net = 0i64;
    for x in &t.per_region {
        let series = p.revenue.get(&x.region).unwrap_or_else(|| panic!("sale region {} not in the file", x.region));
        let obs_sale: i64 = sale_idx.iter().map(|&i| series[i]).sum();
        let obs_pull: i64 = pull_idx.iter().map(|&i| series[i]).sum();
        let cf_sale = (x.counterfactual_sale * 100.0).round() as i64;
        let cf_pull = (x.counterfactual_pull_forward * 100.0).round() as i64;
        assert_eq!(obs_sale - cf_sale, (x.sale_effect * 100.0).round() as i64);
        assert_eq!(obs_pull - cf_pull, (x.pull_forward_effect * 100.0).round() as i64);
        let r_sale = obs_sale as f64 / cf_sale as f64 - 1.0;
        let r_pull = obs_pull as f64 / cf_pull as f64 - 1.0;
        assert!((r_sale - 0.12).abs() < tol::RATIO_OF_ROUNDED, "{r_sale}");
        assert!((r_pull + 0.03).abs() < tol::RATIO_OF_ROUNDED, "{r_pull}");
        total_net += obs_sale + obs_pull - cf_sale - cf_pull;
    }
    assert!((total_net as f64 / 100.0 - t.total_net_effect).abs() < tol::CENTS * 1e3);
}

#[test]
fn sale_regions_sit_inside_the_donor_range() {
    let t = &generated().truth.regional_sale;
    let p = read_panel();
    let start = p.weeks.iter().position(|w| *w == date(&t.sale_weeks[0])).expect("sale start");
    let pre_mean = |s: &Vec<i64>| s[..start].iter().sum::<i64>() as f64 / start as f64;
    let mut donors: Vec<f64> =
        p.revenue.iter().filter(|(r, _)| !t.sale_regions.contains(r)).map(|(_, s)| pre_mean(s)).collect();
    donors.sort_by(f64::total_cmp);
    assert_eq!(donors.len(), 34);
    let donor_avg: Vec<f64> = (0..start)
        .map(|w| {
            p.revenue.iter().filter(|(r, _)| !t.sale_regions.contains(r)).map(|(_, s)| (s[w] as f64).ln()).sum::<f64>()
                / 34.0
        })
        .collect();
    for region in &t.sale_regions {
        let s = &p.revenue[region];
        let m = pre_mean(s);
        // Not among the most extreme: at least 3 donors below and 3 above.
        assert!(m > donors[2] && m < donors[donors.len() - 3], "{region} level {m}");
        let logs: Vec<f64> = s[..start].iter().map(|&c| (c as f64).ln()).collect();
        let r = corr(&logs, &donor_avg);
        assert!(r > 0.8, "{region} follows the donors' factors: corr {r}");
    }
}

struct Customers {
    treat: Vec<String>,
    spend_pre: Vec<i64>,
    y: Vec<i64>,
    region: Vec<String>,
    age: Vec<String>,
    ids: Vec<String>,
}

fn read_customers(rel: &str, treatment: &str) -> Customers {
    let (h, rows) = read_csv(rel);
    let expected =
        ["customer_id", treatment, "spend_pre", "visits_pre", "tenure_months", "region", "age_band", "spend_90d"];
    assert_eq!(h, expected, "{rel} header");
    let get = |name: &str| -> Vec<String> {
        let c = col(&h, name);
        rows.iter().map(|r| r[c].clone()).collect()
    };
    for v in get("visits_pre").iter().chain(&get("tenure_months")) {
        let _: u32 = v.parse().expect("a whole number");
    }
    Customers {
        ids: get("customer_id"),
        treat: get(treatment),
        spend_pre: get("spend_pre").iter().map(|s| cents(s)).collect(),
        y: get("spend_90d").iter().map(|s| cents(s)).collect(),
        region: get("region"),
        age: get("age_band"),
    }
}

fn group_mean(c: &Customers, label: &str) -> (f64, usize) {
    let v: Vec<i64> = (0..c.y.len()).filter(|&i| c.treat[i] == label).map(|i| c.y[i]).collect();
    (v.iter().sum::<i64>() as f64 / v.len() as f64 / 100.0, v.len())
}

#[test]
fn members_true_att_is_six_and_the_raw_difference_is_far_from_it() {
    let t = &generated().truth.loyalty;
    let c = read_customers("members.csv", "joined");
    assert_eq!(c.ids.len(), 50_000);
    assert_eq!(c.ids.iter().collect::<HashSet<_>>().len(), 50_000);
    assert!(c.treat.iter().all(|j| j == "0" || j == "1"));
    let (mt, nt) = group_mean(&c, "1");
    let (mc, _) = group_mean(&c, "0");
    assert_eq!(nt, t.n_treated);
    assert_eq!(t.sample_att, 6.0);
    assert!((mt - t.treated_counterfactual_mean - 6.0).abs() < tol::CENTS);
    assert!((mt - mc - t.raw_difference).abs() < tol::CENTS);
    assert!(mt - mc - 6.0 > 12.0, "the naive difference {} must be far above 6", mt - mc);
    // Zero-heavy outcome, self-selection on past behaviour.
    let zeros = c.y.iter().filter(|&&y| y == 0).count() as f64 / c.y.len() as f64;
    assert!(zeros > 0.3 && zeros < 0.7, "zero share {zeros}");
    assert!((zeros - t.zero_spend_share).abs() < 1e-12);
    let pre = |label: &str| {
        let v: Vec<f64> = (0..c.y.len()).filter(|&i| c.treat[i] == label).map(|i| c.spend_pre[i] as f64).collect();
        mean(&v)
    };
    assert!(pre("1") > 1.5 * pre("0"), "joiners spent more before");
    assert!(c.y.iter().chain(&c.spend_pre).all(|&v| v >= 0));
    let areas: HashSet<&str> = c.region.iter().map(String::as_str).collect();
    assert_eq!(areas, demo::customers::AREAS.into_iter().collect());
    let ages: HashSet<&str> = c.age.iter().map(String::as_str).collect();
    assert_eq!(ages, demo::customers::AGE_BANDS.into_iter().collect());
    // The ATE differs from the ATT (heterogeneous effects, heavier spenders join).
    assert!(t.sample_ate < t.sample_att && t.sample_atc < t.sample_ate);
}

#[test]
fn past_test_effect_is_four_and_the_pool_differs() {
    let t = &generated().truth.past_test;
    let e = read_customers("past_test/experiment.csv", "arm");
    let p = read_customers("past_test/pool.csv", "arm");
    assert_eq!(e.ids.len(), 12_000);
    assert_eq!(p.ids.len(), 20_000);
    assert!(e.treat.iter().all(|a| a == "treated" || a == "control"));
    assert!(p.treat.iter().all(|a| a == "control"));
    let (mt, nt) = group_mean(&e, "treated");
    let (mc, nc) = group_mean(&e, "control");
    assert_eq!((nt, nc), (6_000, 6_000));
    assert_eq!(t.sample_att, 4.0);
    assert_eq!(t.sample_ate, 4.0);
    assert!((mt - t.treated_counterfactual_mean - 4.0).abs() < tol::CENTS);
    assert!((mt - mc - t.experimental_difference).abs() < tol::CENTS);
    // The randomized comparison recovers the truth within 3 standard errors.
    let var = |label: &str, m: f64| {
        let v: Vec<f64> =
            (0..e.y.len()).filter(|&i| e.treat[i] == label).map(|i| (e.y[i] as f64 / 100.0 - m).powi(2)).collect();
        v.iter().sum::<f64>() / (v.len() - 1) as f64
    };
    let se = (var("treated", mt) / nt as f64 + var("control", mc) / nc as f64).sqrt();
    assert!((mt - mc - 4.0).abs() < 3.0 * se, "diff {} se {se}", mt - mc);
    // The pool is a different population: heavier past spenders.
    let pre_mean = |c: &Customers| mean(&c.spend_pre.iter().map(|&x| x as f64).collect::<Vec<_>>());
    assert!(pre_mean(&p) > 1.5 * pre_mean(&e));
    let pool_mean = mean(&p.y.iter().map(|&x| x as f64 / 100.0).collect::<Vec<_>>());
    assert!((mt - pool_mean - t.naive_pool_difference).abs() < tol::CENTS);
    assert!((t.naive_pool_difference - 4.0).abs() > 10.0);
    let ids: HashSet<&String> = e.ids.iter().chain(&p.ids).collect();
    assert_eq!(ids.len(), 32_000, "customer ids are unique across the two files");
}

#[test]
fn event_windows_give_the_stated_att_of_fifteen() {
    let t = &generated().truth.trail_planner;
    let (h, rows) = read_csv("events.csv");
    assert_eq!(h, ["customer_id", "ts", "metric", "value"]);
    let (he, exp_rows) = read_csv("exposures.csv");
    assert_eq!(he, ["customer_id", "exposed_at"]);
    let reference = ts(&t.reference_time);
    let (start, end) = (ts(&t.data_start), ts(&t.data_end));
    assert_eq!(reference, ts("2026-03-02T09:00:00Z"));
    let day = 86_400;
    let mut exposed: HashMap<String, i64> = HashMap::new();
    for r in &exp_rows {
        let t0 = ts(&r[1]);
        assert!(t0 >= reference && t0 < reference + 3600, "batch delivery");
        assert!(t0 + t.forward_window_days * day <= end, "forward window complete");
        assert!(t0 - t.pre_window_days * day >= start, "pre window inside the data");
        assert!(exposed.insert(r[0].clone(), t0).is_none(), "one exposure each");
    }
    assert_eq!(exposed.len(), t.n_exposed);
    assert_eq!(rows.len(), t.n_events);

    let mut forward: HashMap<&str, i64> = HashMap::new();
    let mut pre_visits: HashMap<&str, i64> = HashMap::new();
    let mut customers: HashSet<&str> = HashSet::new();
    let mut last_ts = i64::MIN;
    for r in &rows {
        let when = ts(&r[1]);
        assert!(when >= start && when < end, "event inside the data span");
        assert!(when >= last_ts, "events sorted by time");
        last_ts = when;
        customers.insert(&r[0]);
        let anchor = exposed.get(&r[0]).copied().unwrap_or(reference);
        match r[2].as_str() {
            "visit" => {
                assert_eq!(r[3], "1");
                if when >= anchor - t.pre_window_days * day && when < anchor {
                    *pre_visits.entry(&r[0]).or_default() += 1;
                }
            }
            "order" | "refund" => {
                let v = cents(&r[3]);
                assert!(v > 0, "amounts are positive");
                if r[2] == "order" && when >= anchor && when < anchor + t.forward_window_days * day {
                    *forward.entry(&r[0]).or_default() += v;
                }
            }
            other => panic!("unknown metric {other}"),
        }
    }
    assert!(customers.len() <= t.n_customers);
    let all_ids: Vec<String> = (1..=t.n_customers).map(|i| format!("A{i:04}")).collect();
    // Every id is a customer of the log (an exposed customer may have no events at all).
    let known: HashSet<&str> = all_ids.iter().map(String::as_str).collect();
    assert!(customers.iter().all(|c| known.contains(c)));
    assert!(exposed.keys().all(|c| known.contains(c.as_str())));
    let group = |want_exposed: bool| -> (f64, f64) {
        let ids: Vec<&String> = all_ids.iter().filter(|c| exposed.contains_key(*c) == want_exposed).collect();
        let y: i64 = ids.iter().map(|c| forward.get(c.as_str()).copied().unwrap_or(0)).sum();
        let v: i64 = ids.iter().map(|c| pre_visits.get(c.as_str()).copied().unwrap_or(0)).sum();
        (y as f64 / ids.len() as f64 / 100.0, v as f64 / ids.len() as f64)
    };
    let (y1, v1) = group(true);
    let (y0, v0) = group(false);
    assert_eq!(t.sample_att_order_value, 15.0);
    assert!((y1 - t.treated_observed_mean).abs() < tol::CENTS);
    assert!((y1 - t.treated_counterfactual_mean - 15.0).abs() < tol::CENTS);
    assert!((y0 - t.control_mean).abs() < tol::CENTS);
    // Self-selection: exposed customers were more active before, and the naive difference
    // overstates the effect.
    assert!(v1 > 1.3 * v0, "pre-period visits {v1} vs {v0}");
    assert!(y1 - y0 > 15.0 + 10.0, "naive difference {}", y1 - y0);
}

#[test]
fn readme_states_every_true_effect() {
    let g = generated();
    let text = std::fs::read_to_string(g.dir.join("README.md")).expect("README");
    for needle in [
        "aftercast demo --out DIR",
        "20260302",
        "`lift(k) = 0.04 - 0.015 k / 56`",
        "`lift = 0.025`",
        "multiplied by 1.12 (+12%)",
        "by 0.97 (-3%",
        "**$6.00** exactly",
        "**$4.00** exactly",
        "**$15.00** exactly",
        "crates/aftercast-demo/src/",
    ] {
        assert!(text.contains(needle), "README lacks {needle:?}");
    }
    for region in &g.truth.regional_sale.sale_regions {
        assert!(text.contains(region.as_str()));
    }
    for week in g.truth.regional_sale.sale_weeks.iter().chain(&g.truth.regional_sale.pull_forward_weeks) {
        assert!(text.contains(week.as_str()));
    }
    for f in &g.truth.files {
        assert!(text.contains(&format!("`{}`", f.path)), "README lists {}", f.path);
    }
}
