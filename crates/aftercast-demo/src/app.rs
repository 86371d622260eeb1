//! `app_daily.csv` and `calendar.csv`: Fernhill's daily app orders and revenue, two control
//! series the launch cannot touch, and the holiday calendar.
//!
//! Model (natural logs, day `t` counted from 2024-01-01 (negative before it), `theta = 2 pi t / 365.25`):
//! counterfactual app revenue
//! `= exp(level + trend t + yearly + weekly + holiday + 0.004 (weather - 50) + common + own)`,
//! where `common` is an AR(1) market-demand shock
//! shared with the catalogue (phi 0.75, innovation sd 0.02), `own` the app's own AR(1) noise
//! (phi 0.3, innovation sd 0.018), and `weather` the written weather index. Orders are revenue
//! divided by an average basket near $82 with its own 1.5% daily noise. Catalogue orders
//! share the yearly season (0.8 of the app's amplitude), the weather (0.003 per point) and
//! the common shock, with their own weekly shape, holiday effects, trend, and Poisson noise.
//!
//! The launch on 2026-03-02 multiplies app revenue and app orders by `1 + lift(k)`, `k` days
//! after launch: `lift(k) = 0.04 - 0.015 k / 56` for `0 <= k <= 56` and `0.025` afterwards
//! (linear decay from +4% on 2026-03-02 to +2.5% on 2026-04-27, then constant to 2026-06-30).

use chrono::{Datelike, Duration, NaiveDate, Weekday};
use serde::Serialize;

use crate::error::{DemoError, DemoResult};
use crate::util::{cents, date, iso, poisson, std_normal, to_cents};
use aftercast_resample::rng::Stream;

/// Lift on the launch day.
pub const LIFT_START: f64 = 0.04;
/// Lift from day 56 after launch on.
pub const LIFT_END: f64 = 0.025;
/// Days over which the lift decays linearly.
pub const DECAY_DAYS: i64 = 56;

/// The true lift `k` days after the launch (zero before it).
pub fn lift(k: i64) -> f64 {
    if k < 0 {
        0.0
    } else if k <= DECAY_DAYS {
        LIFT_START - (LIFT_START - LIFT_END) * k as f64 / DECAY_DAYS as f64
    } else {
        LIFT_END
    }
}

/// One post-launch day: the true lift and the hidden counterfactuals.
#[derive(Debug, Clone, Serialize)]
pub struct DailyTruth {
    /// The date.
    pub date: String,
    /// The true multiplicative lift that day.
    pub lift: f64,
    /// App revenue without the launch (dollars, to the cent).
    pub counterfactual_revenue: f64,
    /// App orders without the launch.
    pub counterfactual_orders: i64,
    /// App revenue as written (dollars).
    pub observed_revenue: f64,
    /// App orders as written.
    pub observed_orders: i64,
}

/// The realised effect on one outcome over the whole post period (2026-03-02 to 2026-06-30).
#[derive(Debug, Clone, Serialize)]
pub struct SeriesEffectTruth {
    /// Column of `app_daily.csv`.
    pub column: String,
    /// Sum of observed minus counterfactual over the post period.
    pub cumulative_effect: f64,
    /// Cumulative effect divided by the number of post days.
    pub average_daily_effect: f64,
    /// Cumulative effect divided by the sum of the counterfactual.
    pub relative_effect: f64,
    /// Sum of the counterfactual over the post period.
    pub counterfactual_total: f64,
    /// Sum of the observed values over the post period.
    pub observed_total: f64,
}

/// Truth of the app launch.
#[derive(Debug, Clone, Serialize)]
pub struct AppLaunchTruth {
    /// Launch date (first treated day).
    pub launch_date: String,
    /// Last day of the data.
    pub end_date: String,
    /// Number of post-launch days.
    pub post_days: usize,
    /// Lift on the launch day (0.04).
    pub lift_start: f64,
    /// Lift from `decay_days` after launch on (0.025).
    pub lift_end: f64,
    /// Days of the linear decay (56).
    pub decay_days: i64,
    /// The schedule in words.
    pub schedule: String,
    /// The control columns the launch does not touch.
    pub controls: Vec<String>,
    /// Realised effect on `app_revenue`.
    pub revenue: SeriesEffectTruth,
    /// Realised effect on `app_orders`.
    pub orders: SeriesEffectTruth,
    /// Every post-launch day.
    pub daily: Vec<DailyTruth>,
}

/// Generated app files and their truth.
pub struct AppData {
    /// `app_daily.csv` text.
    pub csv: String,
    /// Rows of `app_daily.csv`.
    pub rows: usize,
    /// `calendar.csv` text.
    pub calendar_csv: String,
    /// Rows of `calendar.csv`.
    pub calendar_rows: usize,
    /// The truth.
    pub truth: AppLaunchTruth,
}

/// A named day and its log effects on app demand and on catalogue orders.
struct Holiday {
    date: NaiveDate,
    name: &'static str,
    app: f64,
    catalogue: f64,
}

fn nth_weekday(y: i32, m: u32, wd: Weekday, n: u32) -> DemoResult<NaiveDate> {
    NaiveDate::from_weekday_of_month_opt(y, m, wd, n as u8)
        .ok_or_else(|| DemoError::Invalid { what: format!("weekday {n} {wd:?} of {y}-{m}") })
}

fn last_weekday(y: i32, m: u32, wd: Weekday) -> DemoResult<NaiveDate> {
    let first_next = if m == 12 { date(y + 1, 1, 1)? } else { date(y, m + 1, 1)? };
    let mut d = first_next - Duration::days(1);
    while d.weekday() != wd {
        d -= Duration::days(1);
    }
    Ok(d)
}

fn easter(y: i32) -> DemoResult<NaiveDate> {
    // Anonymous Gregorian algorithm (Meeus/Jones/Butcher).
    let a = y % 19;
    let b = y / 100;
    let c = y % 100;
    let d = b / 4;
    let e = b % 4;
    let f = (b + 8) / 25;
    let g = (b - f + 1) / 3;
    let h = (19 * a + b - d - g + 15) % 30;
    let i = c / 4;
    let k = c % 4;
    let l = (32 + 2 * e + 2 * i - h - k) % 7;
    let m = (a + 11 * h + 22 * l) / 451;
    let month = (h + l - 7 * m + 114) / 31;
    let day = (h + l - 7 * m + 114) % 31 + 1;
    date(y, month as u32, day as u32)
}

fn holidays(first: NaiveDate, last: NaiveDate) -> DemoResult<Vec<Holiday>> {
    let mut out = Vec::new();
    for y in first.year()..=last.year() {
        let e = easter(y)?;
        let trailhead = nth_weekday(y, 11, Weekday::Thu, 4)? + Duration::days(1);
        let list = [
            (date(y, 1, 1)?, "New Year's Day", -0.20, -2.30),
            (e - Duration::days(2), "Good Friday", 0.08, -0.30),
            (e + Duration::days(1), "Easter Monday", 0.10, -0.30),
            (nth_weekday(y, 5, Weekday::Mon, 1)?, "Early May Bank Holiday", 0.12, -0.25),
            (last_weekday(y, 5, Weekday::Mon)?, "Spring Bank Holiday", 0.12, -0.25),
            (date(y, 6, 14)?, "Founders' Day Sale", 0.25, 0.10),
            (last_weekday(y, 8, Weekday::Mon)?, "Summer Bank Holiday", 0.10, -0.25),
            (trailhead, "Trailhead Friday", 0.40, 0.15),
            (date(y, 12, 24)?, "Christmas Eve", -0.10, -0.50),
            (date(y, 12, 25)?, "Christmas Day", -0.45, -2.30),
            (date(y, 12, 26)?, "Boxing Day", 0.15, -2.30),
            (date(y, 12, 28)?, "Year-End Sale", 0.30, 0.10),
        ];
        for (d, name, app, catalogue) in list {
            if d >= first && d <= last {
                out.push(Holiday { date: d, name, app, catalogue });
            }
        }
    }
    out.sort_by_key(|h| h.date);
    Ok(out)
}

/// Circular distance in days between day-of-year phases.
fn circ_days(t: f64, centre: f64) -> f64 {
    let year = 365.25;
    let d = (t - centre).rem_euclid(year);
    d.min(year - d)
}

/// Shared yearly season of outdoor-gear demand (log scale): a spring/summer peak in late June
/// and a December gift bump.
fn yearly(t: f64) -> f64 {
    let theta = 2.0 * std::f64::consts::PI * t / 365.25;
    // 2024-01-01 is t = 0; late June is t ~ 172, mid-December t ~ 345.
    let peak = 2.0 * std::f64::consts::PI * 172.0 / 365.25;
    let summer = 0.20 * (theta - peak).cos() + 0.04 * (2.0 * (theta - peak)).cos();
    let gift = 0.16 * (-(circ_days(t, 345.0) / 11.0).powi(2)).exp();
    summer + gift
}

fn weather_season(t: f64) -> f64 {
    let theta = 2.0 * std::f64::consts::PI * t / 365.25;
    let peak = 2.0 * std::f64::consts::PI * 190.0 / 365.25;
    50.0 + 18.0 * (theta - peak).cos()
}

/// Generates `app_daily.csv` and `calendar.csv`.
pub fn generate(seed: u64, stream: u64) -> DemoResult<AppData> {
    let mut rng = Stream::new(seed, stream);
    // three years and two months of history before the launch: two full yearly cycles for
    // the placebo dates of a plan, and room for windows as long as the post-period
    let first = date(2023, 1, 1)?;
    let t0 = date(2024, 1, 1)?;
    let last = date(2026, 6, 30)?;
    let launch = date(2026, 3, 2)?;
    let hol = holidays(first, last)?;

    // Weekly shapes, Monday first (log scale).
    let app_week = [0.00, -0.04, -0.03, -0.01, 0.02, 0.06, 0.08];
    let cat_week = [0.06, 0.05, 0.04, 0.03, 0.00, -0.06, -0.12];

    let mut csv = String::from("date,app_orders,app_revenue,catalogue_orders,weather_index\n");
    let mut weather_ar = 0.0;
    let mut common = 0.0;
    let mut own = 0.0;
    let mut cat_own = 0.0;
    let n_days = (last - first).num_days() + 1;
    let mut daily = Vec::new();
    let (mut rev_cf_sum, mut rev_obs_sum, mut ord_cf_sum, mut ord_obs_sum) = (0i64, 0i64, 0i64, 0i64);

    for i in 0..n_days {
        let d = first + Duration::days(i);
        let t = (d - t0).num_days() as f64;
        // Draws in a fixed order per day.
        let z_weather = std_normal(&mut rng);
        let z_common = std_normal(&mut rng);
        let z_own = std_normal(&mut rng);
        let z_basket = std_normal(&mut rng);
        let z_cat = std_normal(&mut rng);

        weather_ar = 0.7 * weather_ar + 6.0 * z_weather;
        let weather = ((weather_season(t) + weather_ar) * 10.0).round() / 10.0;
        common = 0.75 * common + 0.02 * z_common;
        own = 0.3 * own + 0.018 * z_own;
        cat_own = 0.4 * cat_own + 0.006 * z_cat;

        let wd = d.weekday().num_days_from_monday() as usize;
        let (h_app, h_cat) =
            hol.iter().filter(|h| h.date == d).fold((0.0, 0.0), |(a, c), h| (a + h.app, c + h.catalogue));

        let log_rev = (210_000.0f64).ln()
            + 0.12 * t / 365.25
            + yearly(t)
            + app_week[wd]
            + h_app
            + 0.004 * (weather - 50.0)
            + common
            + own;
        let cf_rev = to_cents(log_rev.exp());
        let basket = 82.0 * (0.03 * yearly(t) + 0.015 * z_basket).exp();
        let cf_orders = (cf_rev as f64 / 100.0 / basket).round() as i64;

        let log_cat = (9_000.0f64).ln() - 0.06 * t / 365.25
            + 0.8 * yearly(t)
            + cat_week[wd]
            + h_cat
            + 0.003 * (weather - 50.0)
            + common
            + cat_own;
        let cat = poisson(&mut rng, log_cat.exp())? as i64;

        let k = (d - launch).num_days();
        let l = lift(k);
        let (rev, orders) = if k >= 0 {
            let rev = (cf_rev as f64 * (1.0 + l)).round() as i64;
            let orders = (cf_orders as f64 * (1.0 + l)).round() as i64;
            rev_cf_sum += cf_rev;
            rev_obs_sum += rev;
            ord_cf_sum += cf_orders;
            ord_obs_sum += orders;
            daily.push(DailyTruth {
                date: iso(d),
                lift: l,
                counterfactual_revenue: cf_rev as f64 / 100.0,
                counterfactual_orders: cf_orders,
                observed_revenue: rev as f64 / 100.0,
                observed_orders: orders,
            });
            (rev, orders)
        } else {
            (cf_rev, cf_orders)
        };
        csv.push_str(&format!("{},{},{},{},{:.1}\n", iso(d), orders, cents(rev), cat, weather));
    }

    let post_days = daily.len();
    let effect = |column: &str, cf: i64, obs: i64, unit: f64| SeriesEffectTruth {
        column: column.to_string(),
        cumulative_effect: (obs - cf) as f64 / unit,
        average_daily_effect: (obs - cf) as f64 / unit / post_days as f64,
        relative_effect: (obs - cf) as f64 / cf as f64,
        counterfactual_total: cf as f64 / unit,
        observed_total: obs as f64 / unit,
    };
    let revenue = effect("app_revenue", rev_cf_sum, rev_obs_sum, 100.0);
    let orders = effect("app_orders", ord_cf_sum, ord_obs_sum, 1.0);

    let mut calendar_csv = String::from("date,name\n");
    for h in &hol {
        calendar_csv.push_str(&format!("{},{}\n", iso(h.date), h.name));
    }

    Ok(AppData {
        csv,
        rows: n_days as usize,
        calendar_rows: hol.len(),
        calendar_csv,
        truth: AppLaunchTruth {
            launch_date: iso(launch),
            end_date: iso(last),
            post_days,
            lift_start: LIFT_START,
            lift_end: LIFT_END,
            decay_days: DECAY_DAYS,
            schedule: "app_revenue and app_orders are multiplied by 1 + lift(k) on day k = 0, 1, \
                       ... after 2026-03-02: lift(k) = 0.04 - 0.015 k / 56 for k <= 56 (linear \
                       from +4% on 2026-03-02 to +2.5% on 2026-04-27), then 0.025 to 2026-06-30; \
                       each day rounded to the cent / whole order"
                .to_string(),
            controls: vec!["catalogue_orders".to_string(), "weather_index".to_string()],
            revenue,
            orders,
            daily,
        },
    })
}
