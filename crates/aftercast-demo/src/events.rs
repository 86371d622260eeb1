//! `events.csv` and `exposures.csv`: a per-customer app event log (visits, orders, refunds)
//! and the customers exposed to the Trail Planner invitation.
//!
//! Story: at 2026-03-02T09:00:00Z (the reference time) Fernhill began showing an in-app
//! invitation to its new Trail Planner to the customers who had opted in to app messages;
//! delivery ran in one batch and finished before 10:00. Opting in was self-selected: the more
//! a customer visited and ordered in the 56 days before the reference time, the likelier.
//!
//! Model per customer: hidden activity `z1, z2, z3 ~ Normal(0, 1)`; visits per day
//! `0.06 exp(0.7 z1)`, orders per day `0.035 exp(0.5 z1 + 0.4 z2)`, order values
//! `Gamma(2.5, mean 55 exp(0.3 z3))`; a weekly cycle and a time-of-day profile; each order is
//! refunded in full with probability 0.06 one to 21 days later. Exposure: `logit P = -1.5
//! + 0.08 visits + 0.25 order value / 100` of the customer's visit count and order value
//! (dollars) in `[reference - 56 days, reference)`; exposed at a uniform second in
//! `[09:00, 10:00)` that day.
//!
//! Effect: from its exposure time on, an exposed customer places extra orders at 18% of its own
//! order rate and makes extra visits at 10% of its own visit rate. The extra orders' values are
//! scaled by one common factor (and a few cents moved) so that the exposed customers' extra
//! order value in the forward window `[exposed_at, exposed_at + 28 days)` averages exactly
//! $15.00: the true ATT on the 28-day order-value sum.

use serde::Serialize;

use crate::error::DemoResult;
use crate::util::{
    bernoulli, categorical, cents, date, epoch_seconds, fix_sum, gamma_mean, iso_timestamp, logistic, poisson,
    std_normal, uniform,
};
use aftercast_resample::rng::Stream;

/// Customers in the log.
pub const CUSTOMERS: usize = 8_000;
/// Days in the pre-period window.
pub const PRE_DAYS: i64 = 56;
/// Days in the forward outcome window.
pub const FORWARD_DAYS: i64 = 28;
/// Logit of being exposed: intercept.
pub const EXPOSURE_INTERCEPT: f64 = -1.5;
/// Logit of being exposed: per visit in the 56 days before the reference time.
pub const EXPOSURE_PER_VISIT: f64 = 0.08;
/// Logit of being exposed: per $100 of order value in those 56 days.
pub const EXPOSURE_PER_100_DOLLARS: f64 = 0.25;
/// Days of novelty left out before the deferred outcome window `[7d, 35d)`.
pub const DEFER_DAYS: i64 = 7;
/// True ATT on the 28-day order value sum, in cents.
pub const ATT_CENTS: i64 = 1_500;

/// Truth of the Trail Planner exposure.
#[derive(Debug, Clone, Serialize)]
pub struct ExposureTruth {
    /// Anchor of every window for customers never exposed.
    pub reference_time: String,
    /// First instant of the log (inclusive).
    pub data_start: String,
    /// End of the log (exclusive).
    pub data_end: String,
    /// Customers in the log.
    pub n_customers: usize,
    /// Customers in `exposures.csv`.
    pub n_exposed: usize,
    /// Rows of `events.csv`.
    pub n_events: usize,
    /// Pre-period window `[-56d, 0)` relative to exposure (or the reference time).
    pub pre_window_days: i64,
    /// Forward window `[0, 28d)` relative to exposure (or the reference time).
    pub forward_window_days: i64,
    /// The outcome the truth is stated for.
    pub outcome: String,
    /// Mean over exposed customers of (written 28-day order value minus the value without
    /// exposure): exactly 15.00.
    pub sample_att_order_value: f64,
    /// Mean over exposed customers of the extra order value in the deferred window
    /// `[exposed_at + 7 days, exposed_at + 35 days)` (the novelty week left out).
    pub sample_att_order_value_deferred: f64,
    /// Mean over exposed customers of the extra orders in their forward window.
    pub sample_att_order_count: f64,
    /// Mean written 28-day order value of exposed customers.
    pub treated_observed_mean: f64,
    /// Mean 28-day order value exposed customers would have had without exposure.
    pub treated_counterfactual_mean: f64,
    /// Mean 28-day order value of never-exposed customers (windows at the reference time).
    pub control_mean: f64,
    /// `treated_observed_mean - control_mean`.
    pub raw_difference: f64,
    /// Common factor the extra orders' raw values were scaled by.
    pub extra_value_scale: f64,
}

/// Generated event log, exposures and truth.
pub struct EventsData {
    /// `events.csv` text.
    pub events_csv: String,
    /// Rows of `events.csv`.
    pub event_rows: usize,
    /// `exposures.csv` text.
    pub exposures_csv: String,
    /// Rows of `exposures.csv`.
    pub exposure_rows: usize,
    /// The truth.
    pub truth: ExposureTruth,
}

#[derive(Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
enum Metric {
    Visit,
    Order,
    Refund,
}

impl Metric {
    fn name(self) -> &'static str {
        match self {
            Metric::Visit => "visit",
            Metric::Order => "order",
            Metric::Refund => "refund",
        }
    }
}

struct Event {
    ts: i64,
    customer: usize,
    metric: Metric,
    /// Cents for orders and refunds; 1 for visits.
    value: i64,
    /// Extra event caused by the exposure (index into `extra_orders` for orders/refunds).
    extra_order: Option<usize>,
}

const WEEKDAY: [f64; 7] = [0.90, 0.85, 0.90, 0.95, 1.05, 1.15, 1.20]; // Monday first
const HOURS: [f64; 24] = [
    0.2, 0.1, 0.1, 0.1, 0.1, 0.2, 0.5, 0.9, 1.2, 1.3, 1.3, 1.4, 1.8, 1.7, 1.3, 1.2, 1.3, 1.5, 1.8, 2.2, 2.4, 2.1, 1.4,
    0.6,
];

fn time_in_day(rng: &mut Stream, day_start: i64) -> i64 {
    let h = categorical(rng, &HOURS) as i64;
    let s = ((uniform(rng) * 3600.0) as i64).min(3599);
    day_start + h * 3600 + s
}

/// Generates `events.csv` and `exposures.csv`.
pub fn generate(seed: u64, stream: u64) -> DemoResult<EventsData> {
    let mut rng = Stream::new(seed, stream);
    let start = epoch_seconds(date(2026, 1, 1)?);
    let end = epoch_seconds(date(2026, 4, 20)?);
    let days = (end - start) / 86_400;
    let reference = epoch_seconds(date(2026, 3, 2)?) + 9 * 3600;
    let pre_start = reference - PRE_DAYS * 86_400;
    // 2026-01-01 is a Thursday: weekday index (Monday = 0) of day d is (d + 3) % 7.
    let weekday = |d: i64| ((d + 3) % 7) as usize;

    let mut events: Vec<Event> = Vec::new();
    let mut exposed_at: Vec<Option<i64>> = vec![None; CUSTOMERS];
    // Raw values of extra orders, their customer and timestamp.
    let mut extra_orders: Vec<(usize, i64, f64)> = Vec::new();

    for (c, exposure) in exposed_at.iter_mut().enumerate() {
        let z1 = std_normal(&mut rng);
        let z2 = std_normal(&mut rng);
        let z3 = std_normal(&mut rng);
        let visit_rate = 0.06 * (0.7 * z1).exp();
        let order_rate = 0.035 * (0.5 * z1 + 0.4 * z2).exp();
        let value_mean = 55.0 * (0.3 * z3).exp();

        let (mut pre_visits, mut pre_value) = (0u64, 0i64);
        for d in 0..days {
            let day_start = start + d * 86_400;
            let w = WEEKDAY[weekday(d)];
            for _ in 0..poisson(&mut rng, visit_rate * w)? {
                let ts = time_in_day(&mut rng, day_start);
                if ts >= pre_start && ts < reference {
                    pre_visits += 1;
                }
                events.push(Event { ts, customer: c, metric: Metric::Visit, value: 1, extra_order: None });
            }
            for _ in 0..poisson(&mut rng, order_rate * w)? {
                let ts = time_in_day(&mut rng, day_start);
                let value = ((gamma_mean(&mut rng, 2.5, value_mean)? * 100.0).round() as i64).max(1);
                let refunded = bernoulli(&mut rng, 0.06);
                let delay = 86_400 + ((uniform(&mut rng) * 20.0 * 86_400.0) as i64);
                if ts >= pre_start && ts < reference {
                    pre_value += value;
                }
                events.push(Event { ts, customer: c, metric: Metric::Order, value, extra_order: None });
                if refunded && ts + delay < end {
                    events.push(Event {
                        ts: ts + delay,
                        customer: c,
                        metric: Metric::Refund,
                        value,
                        extra_order: None,
                    });
                }
            }
        }

        let p = logistic(
            EXPOSURE_INTERCEPT
                + EXPOSURE_PER_VISIT * pre_visits as f64
                + EXPOSURE_PER_100_DOLLARS * pre_value as f64 / 10_000.0,
        );
        let exposed = bernoulli(&mut rng, p);
        let t0 = reference + ((uniform(&mut rng) * 3600.0) as i64).min(3599);
        if !exposed {
            continue;
        }
        *exposure = Some(t0);
        let first_day = (t0 - start) / 86_400;
        for d in first_day..days {
            let day_start = start + d * 86_400;
            let w = WEEKDAY[weekday(d)];
            for _ in 0..poisson(&mut rng, 0.10 * visit_rate * w)? {
                let ts = time_in_day(&mut rng, day_start);
                if ts >= t0 {
                    events.push(Event { ts, customer: c, metric: Metric::Visit, value: 1, extra_order: None });
                }
            }
            for _ in 0..poisson(&mut rng, 0.18 * order_rate * w)? {
                let ts = time_in_day(&mut rng, day_start);
                let raw = gamma_mean(&mut rng, 2.5, value_mean)?;
                let refunded = bernoulli(&mut rng, 0.06);
                let delay = 86_400 + ((uniform(&mut rng) * 20.0 * 86_400.0) as i64);
                if ts < t0 {
                    continue;
                }
                let k = extra_orders.len();
                extra_orders.push((c, ts, raw));
                events.push(Event { ts, customer: c, metric: Metric::Order, value: 0, extra_order: Some(k) });
                if refunded && ts + delay < end {
                    events.push(Event {
                        ts: ts + delay,
                        customer: c,
                        metric: Metric::Refund,
                        value: 0,
                        extra_order: Some(k),
                    });
                }
            }
        }
    }

    // Scale the extra orders so their in-window value averages exactly ATT_CENTS.
    let exposed: Vec<usize> = (0..CUSTOMERS).filter(|&c| exposed_at[c].is_some()).collect();
    let in_window = |c: usize, ts: i64| exposed_at[c].is_some_and(|t0| ts >= t0 && ts < t0 + FORWARD_DAYS * 86_400);
    let window_idx: Vec<usize> =
        (0..extra_orders.len()).filter(|&k| in_window(extra_orders[k].0, extra_orders[k].1)).collect();
    let target = ATT_CENTS * exposed.len() as i64;
    let raw_in: f64 = window_idx.iter().map(|&k| extra_orders[k].2).sum();
    let scale = if raw_in > 0.0 { target as f64 / 100.0 / raw_in } else { 1.0 };
    let mut extra_value: Vec<i64> =
        extra_orders.iter().map(|o| ((o.2 * scale * 100.0).round() as i64).max(1)).collect();
    let mut sub: Vec<i64> = window_idx.iter().map(|&k| extra_value[k]).collect();
    let mut pos: Vec<usize> = (0..sub.len()).collect();
    pos.sort_by(|&a, &b| sub[b].cmp(&sub[a]).then(a.cmp(&b)));
    fix_sum(&mut sub, &pos, target);
    for (j, &k) in window_idx.iter().enumerate() {
        extra_value[k] = sub[j].max(1);
    }
    for e in &mut events {
        if let Some(k) = e.extra_order {
            e.value = extra_value[k];
        }
    }

    // Truth on the 28-day forward order value.
    let mut window_value = vec![0i64; CUSTOMERS];
    let mut window_extra_value = vec![0i64; CUSTOMERS];
    let mut window_extra_count = vec![0i64; CUSTOMERS];
    for e in &events {
        if e.metric != Metric::Order {
            continue;
        }
        let anchor = exposed_at[e.customer].unwrap_or(reference);
        if e.ts >= anchor && e.ts < anchor + FORWARD_DAYS * 86_400 {
            window_value[e.customer] += e.value;
            if e.extra_order.is_some() {
                window_extra_value[e.customer] += e.value;
                window_extra_count[e.customer] += 1;
            }
        }
    }
    let n_exp = exposed.len().max(1) as f64;
    let deferred_extra: i64 = events
        .iter()
        .filter(|e| e.metric == Metric::Order && e.extra_order.is_some())
        .filter(|e| {
            exposed_at[e.customer]
                .is_some_and(|t0| e.ts >= t0 + DEFER_DAYS * 86_400 && e.ts < t0 + (DEFER_DAYS + FORWARD_DAYS) * 86_400)
        })
        .map(|e| e.value)
        .sum();
    let controls: Vec<usize> = (0..CUSTOMERS).filter(|&c| exposed_at[c].is_none()).collect();
    let t_obs = exposed.iter().map(|&c| window_value[c]).sum::<i64>() as f64 / n_exp / 100.0;
    let t_extra = exposed.iter().map(|&c| window_extra_value[c]).sum::<i64>() as f64 / n_exp / 100.0;
    let c_obs = controls.iter().map(|&c| window_value[c]).sum::<i64>() as f64 / controls.len().max(1) as f64 / 100.0;

    events.sort_by_key(|e| (e.ts, e.customer, e.metric, e.value));
    let mut events_csv = String::with_capacity(events.len() * 40);
    events_csv.push_str("customer_id,ts,metric,value\n");
    for e in &events {
        let value = match e.metric {
            Metric::Visit => e.value.to_string(),
            Metric::Order | Metric::Refund => cents(e.value),
        };
        events_csv.push_str(&format!("A{:04},{},{},{}\n", e.customer + 1, iso_timestamp(e.ts), e.metric.name(), value));
    }
    let mut exposures_csv = String::from("customer_id,exposed_at\n");
    for &c in &exposed {
        if let Some(t0) = exposed_at[c] {
            exposures_csv.push_str(&format!("A{:04},{}\n", c + 1, iso_timestamp(t0)));
        }
    }

    Ok(EventsData {
        event_rows: events.len(),
        events_csv,
        exposure_rows: exposed.len(),
        exposures_csv,
        truth: ExposureTruth {
            reference_time: iso_timestamp(reference),
            data_start: iso_timestamp(start),
            data_end: iso_timestamp(end),
            n_customers: CUSTOMERS,
            n_exposed: exposed.len(),
            n_events: events.len(),
            pre_window_days: PRE_DAYS,
            forward_window_days: FORWARD_DAYS,
            outcome: "sum of order value (metric = order) in [exposed_at, exposed_at + 28 days); \
                      never-exposed customers anchored at the reference time"
                .to_string(),
            sample_att_order_value: t_extra,
            sample_att_order_value_deferred: deferred_extra as f64 / n_exp / 100.0,
            sample_att_order_count: exposed.iter().map(|&c| window_extra_count[c]).sum::<i64>() as f64 / n_exp,
            treated_observed_mean: t_obs,
            treated_counterfactual_mean: t_obs - t_extra,
            control_mean: c_obs,
            raw_difference: t_obs - c_obs,
            extra_value_scale: scale,
        },
    })
}
