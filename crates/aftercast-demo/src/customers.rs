//! `members.csv` (the loyalty scheme) and `past_test/` (a past randomized win-back test and a
//! non-experimental pool): one customer model shared by all three files.
//!
//! Customer model (per customer, in this order): sales area and age band (categorical),
//! `tenure_months = 1 + floor(Gamma(1.5, mean 30))` capped at 240, a hidden engagement
//! `g ~ Normal(age effect + 0.003 (tenure - 30), 0.8)`, `visits_pre ~ Poisson(exp(0.6 + g))`,
//! `spend_pre` zero with probability `1 - logistic(-0.5 + 1.1 g + 0.5 ln(1 + visits_pre))`,
//! else `Gamma(1.6, mean 45 exp(0.5 g))`. The 90-day spend without treatment is zero with
//! probability `1 - logistic(-0.7 + 0.9 g + 0.25 ln(1 + spend_pre) + 0.15 ln(1 + visits_pre))`,
//! else `Gamma(1.8, mean 40 exp(0.45 g + 0.12 ln(1 + spend_pre)) area age)`.
//!
//! Treatment assignment depends only on written covariates and independent noise, so
//! adjustment for the written covariates identifies the effect (no hidden confounding), and a
//! propensity model logistic-linear in the written covariates is correctly specified:
//! - loyalty: `logit P(join) = -2.3 + 0.5 spend_pre / 100 + 0.06 visits_pre + 0.006 tenure
//!   + age + area` (the `JOIN_*`, `AGE_JOIN`, `AREA_JOIN` constants);
//! - past test: the test customers were drawn from the same customer base as the pool, each
//!   kept with `logit P(kept) = 0.3 - 0.8 spend_pre / 100 - 0.25 visits_pre` (lapsing
//!   customers), then split in half by a random permutation. The pool is a plain sample of the
//!   base, so given the covariates both files share one outcome model.
//!
//! Individual effects are heterogeneous and never negative: `0.06 y0 + 2` for a customer who
//! would have spent `y0 > 0`, and for a customer who would have spent nothing a Gamma(2, mean 25)
//! spend with probability 0.08 (loyalty; past test: `0.04 y0 + 1.5`, probability 0.06, mean 20).
//! They are then scaled by one common factor and rounded to cents, and a few cents are moved so
//! that the treated customers' effects average exactly $6.00 (loyalty) and both arms' effects
//! average exactly $4.00 (past test).

use serde::Serialize;

use crate::error::DemoResult;
use crate::util::{bernoulli, categorical, cents, fix_sum, gamma_mean, logistic, poisson, std_normal, uniform};
use aftercast_resample::rng::Stream;

/// Sales areas (the `region` column of the customer files).
pub const AREAS: [&str; 8] =
    ["Fellside", "Moorland", "Riverlands", "Coast", "Capital", "Valleys", "Borders", "Islands"];
/// Age bands (the `age_band` column).
pub const AGE_BANDS: [&str; 6] = ["18-24", "25-34", "35-44", "45-54", "55-64", "65+"];

const AREA_WEIGHTS: [f64; 8] = [0.10, 0.12, 0.14, 0.14, 0.22, 0.12, 0.09, 0.07];
const AGE_WEIGHTS: [f64; 6] = [0.10, 0.20, 0.22, 0.20, 0.16, 0.12];
const AGE_ENGAGEMENT: [f64; 6] = [-0.3, 0.0, 0.2, 0.2, 0.0, -0.2];
const AGE_JOIN: [f64; 6] = [-0.3, 0.1, 0.2, 0.1, 0.0, -0.2];
const AREA_JOIN: [f64; 8] = [0.1, -0.1, 0.0, 0.2, 0.3, -0.2, -0.1, -0.3];
const AREA_SPEND: [f64; 8] = [0.05, -0.05, 0.0, 0.08, 0.12, -0.08, -0.03, -0.10];
const AGE_SPEND: [f64; 6] = [-0.15, 0.0, 0.08, 0.10, 0.05, -0.05];

/// Logit of joining the loyalty scheme: intercept.
pub const JOIN_INTERCEPT: f64 = -2.3;
/// Logit of joining: per $100 of `spend_pre`.
pub const JOIN_PER_100_DOLLARS: f64 = 0.5;
/// Logit of joining: per visit in `visits_pre`.
pub const JOIN_PER_VISIT: f64 = 0.06;
/// Logit of joining: per month of tenure.
pub const JOIN_PER_MONTH: f64 = 0.006;
/// Logit of a base customer being kept for the past test (a lapsing customer): intercept.
pub const LAPSING_INTERCEPT: f64 = 0.3;
/// Logit of being in the past test: per $100 of `spend_pre`.
pub const LAPSING_PER_100_DOLLARS: f64 = -0.8;
/// Logit of being in the past test: per visit.
pub const LAPSING_PER_VISIT: f64 = -0.25;

/// The true sample ATT of the loyalty scheme in `members.csv` (dollars).
pub const LOYALTY_ATT_CENTS: i64 = 600;
/// The true sample effect of the past test's offer (dollars), in both arms.
pub const PAST_TEST_EFFECT_CENTS: i64 = 400;

/// Header of `members.csv`.
pub const MEMBERS_HEADER: &str = "customer_id,joined,spend_pre,visits_pre,tenure_months,region,age_band,spend_90d";
/// Header of `past_test/experiment.csv` and `past_test/pool.csv`.
pub const PAST_TEST_HEADER: &str = "customer_id,arm,spend_pre,visits_pre,tenure_months,region,age_band,spend_90d";

/// Truth of the loyalty scheme.
#[derive(Debug, Clone, Serialize)]
pub struct LoyaltyTruth {
    /// Customers in `members.csv`.
    pub n: usize,
    /// Customers who joined (`joined = 1`).
    pub n_treated: usize,
    /// Mean over joiners of (written spend_90d minus spend without the scheme): exactly 6.00.
    pub sample_att: f64,
    /// Mean over all customers of their individual effect (joiners' as above, non-joiners'
    /// drawn from the same effect rule with the same scale).
    pub sample_ate: f64,
    /// Mean over non-joiners of their individual effect.
    pub sample_atc: f64,
    /// Mean written spend_90d of joiners.
    pub treated_observed_mean: f64,
    /// Mean spend_90d joiners would have had without the scheme.
    pub treated_counterfactual_mean: f64,
    /// Mean written spend_90d of non-joiners.
    pub control_mean: f64,
    /// `treated_observed_mean - control_mean`: what the naive comparison says.
    pub raw_difference: f64,
    /// Share of customers with spend_90d = 0.
    pub zero_spend_share: f64,
    /// The common factor the raw individual effects were scaled by.
    pub effect_scale: f64,
}

/// Truth of the past randomized test and the pool.
#[derive(Debug, Clone, Serialize)]
pub struct PastTestTruth {
    /// Customers in `past_test/experiment.csv`.
    pub n_experiment: usize,
    /// Treated arm size.
    pub n_treated: usize,
    /// Control arm size.
    pub n_control: usize,
    /// Customers in `past_test/pool.csv`.
    pub n_pool: usize,
    /// Mean individual effect over the treated arm: exactly 4.00.
    pub sample_att: f64,
    /// Mean individual effect over all experiment customers: exactly 4.00.
    pub sample_ate: f64,
    /// Treated-arm mean minus control-arm mean in the written experiment.
    pub experimental_difference: f64,
    /// Treated-arm mean of spend_90d.
    pub treated_mean: f64,
    /// Mean spend_90d the treated arm would have had without the offer.
    pub treated_counterfactual_mean: f64,
    /// Pool mean of spend_90d.
    pub pool_mean: f64,
    /// Treated-arm mean minus pool mean: the naive non-experimental comparison.
    pub naive_pool_difference: f64,
}

/// Generated `members.csv`.
pub struct MembersData {
    /// File text.
    pub csv: String,
    /// Data rows.
    pub rows: usize,
    /// The truth.
    pub truth: LoyaltyTruth,
}

/// Generated `past_test/` files.
pub struct PastTestData {
    /// `experiment.csv` text.
    pub experiment_csv: String,
    /// Rows of `experiment.csv`.
    pub experiment_rows: usize,
    /// `pool.csv` text.
    pub pool_csv: String,
    /// Rows of `pool.csv`.
    pub pool_rows: usize,
    /// The truth.
    pub truth: PastTestTruth,
}

struct Customer {
    area: usize,
    age: usize,
    tenure: u32,
    visits_pre: u64,
    spend_pre: i64,
    engagement: f64,
}

fn draw_customer(rng: &mut Stream) -> DemoResult<Customer> {
    let area = categorical(rng, &AREA_WEIGHTS);
    let age = categorical(rng, &AGE_WEIGHTS);
    let tenure = (1.0 + gamma_mean(rng, 1.5, 30.0)?.floor()).min(240.0) as u32;
    let engagement = AGE_ENGAGEMENT[age] + 0.003 * (tenure as f64 - 30.0) + 0.8 * std_normal(rng);
    let visits_pre = poisson(rng, (0.6 + engagement).exp())?;
    let p_spend = logistic(-0.5 + 1.1 * engagement + 0.5 * (visits_pre as f64).ln_1p());
    let buys = bernoulli(rng, p_spend);
    let amount = gamma_mean(rng, 1.6, 45.0 * (0.5 * engagement).exp())?;
    let spend_pre = if buys { (amount * 100.0).round() as i64 } else { 0 };
    Ok(Customer { area, age, tenure, visits_pre, spend_pre, engagement })
}

/// 90-day spend without treatment, in cents.
fn draw_untreated_spend(rng: &mut Stream, c: &Customer) -> DemoResult<i64> {
    let sp = (c.spend_pre as f64 / 100.0).ln_1p();
    let vp = (c.visits_pre as f64).ln_1p();
    let p = logistic(-0.7 + 0.9 * c.engagement + 0.25 * sp + 0.15 * vp);
    let buys = bernoulli(rng, p);
    let mean = 40.0 * (0.45 * c.engagement + 0.12 * sp + AREA_SPEND[c.area] + AGE_SPEND[c.age]).exp();
    let amount = gamma_mean(rng, 1.8, mean)?;
    Ok(if buys { (amount * 100.0).round() as i64 } else { 0 })
}

/// Raw (unscaled) individual effect in dollars.
fn draw_raw_effect(
    rng: &mut Stream,
    y0_cents: i64,
    slope: f64,
    base: f64,
    convert_p: f64,
    convert_mean: f64,
) -> DemoResult<f64> {
    let converts = bernoulli(rng, convert_p);
    let converted = gamma_mean(rng, 2.0, convert_mean)?;
    Ok(if y0_cents > 0 {
        slope * y0_cents as f64 / 100.0 + base
    } else if converts {
        converted
    } else {
        0.0
    })
}

/// Scales raw effects by `scale`, rounds to cents, and moves cents within `group` (largest
/// effects first) so that the group's effects sum to `target` cents exactly.
fn scaled_effects(raw: &[f64], scale: f64, group: &[usize], target: i64) -> Vec<i64> {
    let mut e: Vec<i64> = raw.iter().map(|r| (r * scale * 100.0).round() as i64).collect();
    let mut pos: Vec<usize> = (0..group.len()).collect();
    pos.sort_by(|&a, &b| e[group[b]].cmp(&e[group[a]]).then(a.cmp(&b)));
    let mut sub: Vec<i64> = group.iter().map(|&i| e[i]).collect();
    fix_sum(&mut sub, &pos, target);
    for (k, &i) in group.iter().enumerate() {
        e[i] = sub[k];
    }
    e
}

fn row(id: &str, label: &str, c: &Customer, y: i64) -> String {
    format!(
        "{},{},{},{},{},{},{},{}\n",
        id,
        label,
        cents(c.spend_pre),
        c.visits_pre,
        c.tenure,
        AREAS[c.area],
        AGE_BANDS[c.age],
        cents(y)
    )
}

fn mean_cents(v: impl Iterator<Item = i64>) -> f64 {
    let (s, n) = v.fold((0i64, 0usize), |(s, n), x| (s + x, n + 1));
    if n == 0 { 0.0 } else { s as f64 / n as f64 / 100.0 }
}

/// Generates `members.csv` (50,000 customers).
pub fn generate_members(seed: u64, stream: u64) -> DemoResult<MembersData> {
    let mut rng = Stream::new(seed, stream);
    let n = 50_000;
    let mut cust = Vec::with_capacity(n);
    let mut joined = Vec::with_capacity(n);
    let mut y0 = Vec::with_capacity(n);
    let mut raw = Vec::with_capacity(n);
    for _ in 0..n {
        let c = draw_customer(&mut rng)?;
        let idx = JOIN_INTERCEPT
            + JOIN_PER_100_DOLLARS * c.spend_pre as f64 / 10_000.0
            + JOIN_PER_VISIT * c.visits_pre as f64
            + JOIN_PER_MONTH * c.tenure as f64
            + AGE_JOIN[c.age]
            + AREA_JOIN[c.area];
        joined.push(bernoulli(&mut rng, logistic(idx)));
        let y = draw_untreated_spend(&mut rng, &c)?;
        raw.push(draw_raw_effect(&mut rng, y, 0.06, 2.0, 0.08, 25.0)?);
        y0.push(y);
        cust.push(c);
    }
    let treated: Vec<usize> = (0..n).filter(|&i| joined[i]).collect();
    let raw_sum: f64 = treated.iter().map(|&i| raw[i]).sum();
    let target = LOYALTY_ATT_CENTS * treated.len() as i64;
    let scale = target as f64 / 100.0 / raw_sum;
    let effect = scaled_effects(&raw, scale, &treated, target);

    let mut csv = String::from(MEMBERS_HEADER);
    csv.push('\n');
    let mut y_obs = Vec::with_capacity(n);
    for i in 0..n {
        let y = y0[i] + if joined[i] { effect[i] } else { 0 };
        y_obs.push(y);
        csv.push_str(&row(&format!("M{:06}", i + 1), if joined[i] { "1" } else { "0" }, &cust[i], y));
    }
    let t_obs = mean_cents(treated.iter().map(|&i| y_obs[i]));
    let t_cf = mean_cents(treated.iter().map(|&i| y0[i]));
    let c_obs = mean_cents((0..n).filter(|&i| !joined[i]).map(|i| y_obs[i]));
    Ok(MembersData {
        csv,
        rows: n,
        truth: LoyaltyTruth {
            n,
            n_treated: treated.len(),
            sample_att: mean_cents(treated.iter().map(|&i| effect[i])),
            sample_ate: mean_cents(effect.iter().copied()),
            sample_atc: mean_cents((0..n).filter(|&i| !joined[i]).map(|i| effect[i])),
            treated_observed_mean: t_obs,
            treated_counterfactual_mean: t_cf,
            control_mean: c_obs,
            raw_difference: t_obs - c_obs,
            zero_spend_share: y_obs.iter().filter(|&&y| y == 0).count() as f64 / n as f64,
            effect_scale: scale,
        },
    })
}

/// Generates `past_test/experiment.csv` (12,000 customers, 6,000 per arm) and
/// `past_test/pool.csv` (20,000 customers who never got the offer; `arm` is `control`).
pub fn generate_past_test(seed: u64, stream: u64) -> DemoResult<PastTestData> {
    let mut rng = Stream::new(seed, stream);
    let n = 12_000;
    let n_pool = 20_000;
    // Both files come from the same customer base; the test took lapsing customers, chosen
    // at random with a probability that falls with written past spend and visits only.
    let mut cust = Vec::with_capacity(n);
    let mut y0 = Vec::with_capacity(n);
    let mut raw = Vec::with_capacity(n);
    while cust.len() < n {
        let c = draw_customer(&mut rng)?;
        let logit = LAPSING_INTERCEPT
            + LAPSING_PER_100_DOLLARS * c.spend_pre as f64 / 10_000.0
            + LAPSING_PER_VISIT * c.visits_pre as f64;
        let selected = bernoulli(&mut rng, logistic(logit));
        let y = draw_untreated_spend(&mut rng, &c)?;
        let r = draw_raw_effect(&mut rng, y, 0.04, 1.5, 0.06, 20.0)?;
        if selected {
            raw.push(r);
            y0.push(y);
            cust.push(c);
        }
    }
    // Complete randomization: a random permutation, first half treated.
    let mut perm: Vec<usize> = (0..n).collect();
    for i in (1..n).rev() {
        let j = ((uniform(&mut rng) * (i + 1) as f64) as usize).min(i);
        perm.swap(i, j);
    }
    let mut treated_flag = vec![false; n];
    for &i in &perm[..n / 2] {
        treated_flag[i] = true;
    }
    let treated: Vec<usize> = (0..n).filter(|&i| treated_flag[i]).collect();
    let control: Vec<usize> = (0..n).filter(|&i| !treated_flag[i]).collect();
    let t_target = PAST_TEST_EFFECT_CENTS * treated.len() as i64;
    let c_target = PAST_TEST_EFFECT_CENTS * control.len() as i64;
    let raw_t: f64 = treated.iter().map(|&i| raw[i]).sum();
    let mut effect = scaled_effects(&raw, t_target as f64 / 100.0 / raw_t, &treated, t_target);
    let raw_c: f64 = control.iter().map(|&i| raw[i]).sum();
    let effect_c = scaled_effects(&raw, c_target as f64 / 100.0 / raw_c, &control, c_target);
    for &i in &control {
        effect[i] = effect_c[i];
    }

    let mut experiment_csv = String::from(PAST_TEST_HEADER);
    experiment_csv.push('\n');
    let mut y_obs = Vec::with_capacity(n);
    for i in 0..n {
        let y = y0[i] + if treated_flag[i] { effect[i] } else { 0 };
        y_obs.push(y);
        experiment_csv.push_str(&row(
            &format!("T{:06}", i + 1),
            if treated_flag[i] { "treated" } else { "control" },
            &cust[i],
            y,
        ));
    }

    let mut pool_csv = String::from(PAST_TEST_HEADER);
    pool_csv.push('\n');
    let mut pool_y = Vec::with_capacity(n_pool);
    for i in 0..n_pool {
        let c = draw_customer(&mut rng)?;
        let y = draw_untreated_spend(&mut rng, &c)?;
        pool_y.push(y);
        pool_csv.push_str(&row(&format!("P{:06}", i + 1), "control", &c, y));
    }

    let t_mean = mean_cents(treated.iter().map(|&i| y_obs[i]));
    let c_mean = mean_cents(control.iter().map(|&i| y_obs[i]));
    let p_mean = mean_cents(pool_y.iter().copied());
    Ok(PastTestData {
        experiment_csv,
        experiment_rows: n,
        pool_csv,
        pool_rows: n_pool,
        truth: PastTestTruth {
            n_experiment: n,
            n_treated: treated.len(),
            n_control: control.len(),
            n_pool,
            sample_att: mean_cents(treated.iter().map(|&i| effect[i])),
            sample_ate: mean_cents(effect.iter().copied()),
            experimental_difference: t_mean - c_mean,
            treated_mean: t_mean,
            treated_counterfactual_mean: mean_cents(treated.iter().map(|&i| y0[i])),
            pool_mean: p_mean,
            naive_pool_difference: t_mean - p_mean,
        },
    })
}
