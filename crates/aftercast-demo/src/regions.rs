//! `regions_weekly.csv`: weekly store revenue of 40 regions over 156 weeks (Mondays from
//! 2023-07-03 to 2026-06-22), with a spring sale in 6 of them.
//!
//! Model (natural logs, week `w` from 0):
//! `log revenue = level_r + trend_r w / 52 + season_r s(w) + demand_r f(w) + local_r g(w) + e_rw`,
//! with three latent factors: the
//! outdoor-gear yearly season `s` (summer peak, December bump), a national demand factor `f`
//! (AR(1), phi 0.97, innovation sd 0.015) and a regional-mix factor `g` (AR(1), phi 0.8,
//! innovation sd 0.02); region loadings `season_r` in [0.5, 1.5], `demand_r` in [0.6, 1.4],
//! `local_r` in [-1, 1]; `e_rw` AR(1) noise (phi 0.3, innovation sd 0.02). The level follows
//! the region's store count.
//!
//! The sale multiplies the counterfactual revenue of the 6 sale regions by 1.12 in the weeks
//! of 2026-04-06, 04-13, 04-20 and 04-27, and by 0.97 in the weeks of 2026-05-04 and 05-11
//! (pull-forward). The sale regions are the 6 regions closest to the median of all regions in
//! (level, trend, loadings), so they sit inside the donors' range.

use chrono::{Duration, NaiveDate};
use serde::Serialize;

use crate::error::DemoResult;
use crate::util::{cents, date, iso, std_normal, uniform};
use aftercast_resample::rng::Stream;

/// Invented region names.
pub const REGIONS: [&str; 40] = [
    "Ashcombe",
    "Birchfold",
    "Bramblemoor",
    "Calderwick",
    "Copperdale",
    "Dunmere",
    "Eddleton",
    "Elderhope",
    "Fallowmere",
    "Fernbury",
    "Foxhollow",
    "Glenmarsh",
    "Greywater",
    "Hallowfield",
    "Heathcote",
    "Highcrag",
    "Ivydale",
    "Juniperholt",
    "Kestrelmouth",
    "Kingsfold",
    "Larchmont",
    "Lowmoor",
    "Marrowdale",
    "Mistlecombe",
    "Northwold",
    "Oakhaven",
    "Pebblebrook",
    "Quarryhill",
    "Ravenscar",
    "Redtarn",
    "Rowanford",
    "Saltmarsh",
    "Shepherdsford",
    "Stonebeck",
    "Thornwick",
    "Ashbywold",
    "Wetherfell",
    "Willowmere",
    "Wrenfield",
    "Yarrowby",
];

/// Number of weeks in the panel.
pub const WEEKS: usize = 156;
/// Relative effect during the sale weeks.
pub const SALE_LIFT: f64 = 0.12;
/// Relative effect in the two weeks after the sale.
pub const PULL_FORWARD_LIFT: f64 = -0.03;

/// One sale region's realised effects (dollars).
#[derive(Debug, Clone, Serialize)]
pub struct RegionEffectTruth {
    /// Region name.
    pub region: String,
    /// Sum over the 4 sale weeks of observed minus counterfactual revenue.
    pub sale_effect: f64,
    /// Sum over the 2 pull-forward weeks of observed minus counterfactual revenue.
    pub pull_forward_effect: f64,
    /// `sale_effect + pull_forward_effect`.
    pub net_effect: f64,
    /// Counterfactual revenue over the 4 sale weeks.
    pub counterfactual_sale: f64,
    /// Counterfactual revenue over the 2 pull-forward weeks.
    pub counterfactual_pull_forward: f64,
    /// Net effect divided by the counterfactual over all 6 weeks.
    pub relative_net: f64,
}

/// Truth of the spring sale.
#[derive(Debug, Clone, Serialize)]
pub struct RegionalSaleTruth {
    /// The 6 sale regions.
    pub sale_regions: Vec<String>,
    /// Mondays of the 4 sale weeks.
    pub sale_weeks: Vec<String>,
    /// Mondays of the 2 pull-forward weeks.
    pub pull_forward_weeks: Vec<String>,
    /// First week of the panel.
    pub first_week: String,
    /// Last week of the panel.
    pub last_week: String,
    /// Relative effect during the sale (+0.12).
    pub sale_lift: f64,
    /// Relative effect in the two weeks after (-0.03).
    pub pull_forward_lift: f64,
    /// Per sale region.
    pub per_region: Vec<RegionEffectTruth>,
    /// Sum of `sale_effect` over the sale regions.
    pub total_sale_effect: f64,
    /// Sum of `pull_forward_effect` over the sale regions.
    pub total_pull_forward_effect: f64,
    /// Sum of `net_effect` over the sale regions.
    pub total_net_effect: f64,
    /// Mean over sale regions and the 4 sale weeks of the weekly effect.
    pub average_weekly_sale_effect_per_region: f64,
    /// Mean over sale regions and all 6 affected weeks of the weekly effect (net).
    pub average_weekly_net_effect_per_region: f64,
    /// Total net effect divided by total counterfactual over the 6 affected weeks.
    pub relative_net_effect: f64,
    /// Mean over sale regions and all post weeks (2026-04-06 to the last week) of the weekly
    /// effect: what an average effect over the whole post period should find.
    pub average_weekly_effect_whole_post: f64,
    /// Number of post weeks (from the first sale week to the last week).
    pub post_weeks: usize,
}

/// Generated regional panel and its truth.
pub struct RegionsData {
    /// `regions_weekly.csv` text.
    pub csv: String,
    /// Data rows.
    pub rows: usize,
    /// The truth.
    pub truth: RegionalSaleTruth,
}

struct Region {
    level: f64,
    trend: f64,
    season: f64,
    demand: f64,
    local: f64,
    stores: u32,
    population_k: u32,
}

fn season(t_days: f64) -> f64 {
    // t_days: days since 2024-01-01 of the week's midpoint.
    let theta = 2.0 * std::f64::consts::PI * t_days / 365.25;
    let peak = 2.0 * std::f64::consts::PI * 172.0 / 365.25;
    let year = 365.25;
    let d = (t_days - 345.0).rem_euclid(year);
    let gift = 0.12 * (-(d.min(year - d) / 12.0).powi(2)).exp();
    0.22 * (theta - peak).cos() + gift
}

/// Generates `regions_weekly.csv`.
pub fn generate(seed: u64, stream: u64) -> DemoResult<RegionsData> {
    let mut rng = Stream::new(seed, stream);
    let first: NaiveDate = date(2023, 7, 3)?;
    let origin = date(2024, 1, 1)?;
    let weeks: Vec<NaiveDate> = (0..WEEKS as i64).map(|w| first + Duration::days(7 * w)).collect();
    let sale_start = date(2026, 4, 6)?;
    let sale_weeks: Vec<NaiveDate> = (0..4).map(|k| sale_start + Duration::days(7 * k)).collect();
    let pull_weeks: Vec<NaiveDate> = (4..6).map(|k| sale_start + Duration::days(7 * k)).collect();

    let mut regions = Vec::with_capacity(REGIONS.len());
    for _ in REGIONS {
        let stores = 2 + (uniform(&mut rng) * 13.0) as u32; // 2..=14
        let per_store = 38_000.0 * (0.15 * std_normal(&mut rng)).exp();
        let population_k = (stores as f64 * 90.0 * (0.25 * std_normal(&mut rng)).exp()).round() as u32;
        regions.push(Region {
            level: (stores as f64 * per_store).ln(),
            trend: 0.03 + 0.02 * std_normal(&mut rng),
            season: 0.5 + uniform(&mut rng),
            demand: 0.6 + 0.8 * uniform(&mut rng),
            local: -1.0 + 2.0 * uniform(&mut rng),
            stores,
            population_k,
        });
    }

    // Sale regions: closest to the median in standardized (level, trend, loadings).
    let feats: Vec<[f64; 5]> = regions.iter().map(|r| [r.level, r.trend, r.season, r.demand, r.local]).collect();
    let mut centre = [0.0; 5];
    let mut scale = [0.0; 5];
    for j in 0..5 {
        let mut col: Vec<f64> = feats.iter().map(|f| f[j]).collect();
        col.sort_by(f64::total_cmp);
        centre[j] = 0.5 * (col[19] + col[20]);
        let mean = col.iter().sum::<f64>() / col.len() as f64;
        scale[j] = (col.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (col.len() - 1) as f64).sqrt();
    }
    let mut by_dist: Vec<(f64, usize)> = feats
        .iter()
        .enumerate()
        .map(|(i, f)| {
            let d: f64 = (0..5).map(|j| ((f[j] - centre[j]) / scale[j]).powi(2)).sum();
            (d, i)
        })
        .collect();
    by_dist.sort_by(|a, b| a.0.total_cmp(&b.0));
    let mut sale: Vec<usize> = by_dist.iter().take(6).map(|p| p.1).collect();
    sale.sort_unstable();

    // Latent factors.
    let mut demand = 0.0;
    let mut local = 0.0;
    let mut f = Vec::with_capacity(WEEKS);
    let mut g = Vec::with_capacity(WEEKS);
    for _ in 0..WEEKS {
        demand = 0.97 * demand + 0.015 * std_normal(&mut rng);
        local = 0.8 * local + 0.02 * std_normal(&mut rng);
        f.push(demand);
        g.push(local);
    }

    let mut csv = String::from("region,week,revenue,store_count,population_k\n");
    let mut per_region = Vec::new();
    let mut post_effect_total = 0i64;
    let (mut total_sale_cents, mut total_pull_cents, mut total_cf_cents) = (0i64, 0i64, 0i64);
    let post_weeks = weeks.iter().filter(|w| **w >= sale_start).count();
    for (ri, (name, r)) in REGIONS.iter().zip(&regions).enumerate() {
        let is_sale = sale.contains(&ri);
        let mut noise = 0.0;
        let (mut s_eff, mut p_eff, mut s_cf, mut p_cf) = (0i64, 0i64, 0i64, 0i64);
        for (w, week) in weeks.iter().enumerate() {
            noise = 0.3 * noise + 0.02 * std_normal(&mut rng);
            let mid = (*week - origin).num_days() as f64 + 3.0;
            let log_rev =
                r.level + r.trend * w as f64 / 52.0 + r.season * season(mid) + r.demand * f[w] + r.local * g[w] + noise;
            let cf = (log_rev.exp() * 100.0).round() as i64;
            let obs = if is_sale && sale_weeks.contains(week) {
                let o = (cf as f64 * (1.0 + SALE_LIFT)).round() as i64;
                s_eff += o - cf;
                s_cf += cf;
                o
            } else if is_sale && pull_weeks.contains(week) {
                let o = (cf as f64 * (1.0 + PULL_FORWARD_LIFT)).round() as i64;
                p_eff += o - cf;
                p_cf += cf;
                o
            } else {
                cf
            };
            csv.push_str(&format!("{},{},{},{},{}\n", name, iso(*week), cents(obs), r.stores, r.population_k));
        }
        if is_sale {
            post_effect_total += s_eff + p_eff;
            total_sale_cents += s_eff;
            total_pull_cents += p_eff;
            total_cf_cents += s_cf + p_cf;
            per_region.push(RegionEffectTruth {
                region: name.to_string(),
                sale_effect: s_eff as f64 / 100.0,
                pull_forward_effect: p_eff as f64 / 100.0,
                net_effect: (s_eff + p_eff) as f64 / 100.0,
                counterfactual_sale: s_cf as f64 / 100.0,
                counterfactual_pull_forward: p_cf as f64 / 100.0,
                relative_net: (s_eff + p_eff) as f64 / (s_cf + p_cf) as f64,
            });
        }
    }

    let total_sale = total_sale_cents as f64 / 100.0;
    let total_pull = total_pull_cents as f64 / 100.0;
    let total_net = (total_sale_cents + total_pull_cents) as f64 / 100.0;
    let total_cf = total_cf_cents as f64 / 100.0;
    let n_sale = per_region.len() as f64;
    Ok(RegionsData {
        csv,
        rows: REGIONS.len() * WEEKS,
        truth: RegionalSaleTruth {
            sale_regions: sale.iter().map(|&i| REGIONS[i].to_string()).collect(),
            sale_weeks: sale_weeks.iter().map(|d| iso(*d)).collect(),
            pull_forward_weeks: pull_weeks.iter().map(|d| iso(*d)).collect(),
            first_week: iso(weeks[0]),
            last_week: iso(weeks[WEEKS - 1]),
            sale_lift: SALE_LIFT,
            pull_forward_lift: PULL_FORWARD_LIFT,
            total_sale_effect: total_sale,
            total_pull_forward_effect: total_pull,
            total_net_effect: total_net,
            average_weekly_sale_effect_per_region: total_sale / (n_sale * 4.0),
            average_weekly_net_effect_per_region: total_net / (n_sale * 6.0),
            relative_net_effect: total_net / total_cf,
            average_weekly_effect_whole_post: post_effect_total as f64 / 100.0 / (n_sale * post_weeks as f64),
            post_weeks,
            per_region,
        },
    })
}

/// `regions_weekly_totals.csv` from the panel: per week, the summed revenue of the sale regions
/// and of the other regions (a control series untouched by the sale), so that the sale can also
/// be measured by a forecast of the sale regions' total. Returns the text and its data rows.
pub fn totals_csv(panel_csv: &str, sale_regions: &[String]) -> (String, usize) {
    let mut weeks: Vec<(String, i64, i64)> = Vec::new();
    for line in panel_csv.lines().skip(1) {
        let mut f = line.split(',');
        let (Some(region), Some(week), Some(revenue)) = (f.next(), f.next(), f.next()) else { continue };
        // revenue is written in cents precision: sum whole cents, never floats
        let cents = revenue.split_once('.').map_or_else(
            || revenue.parse::<i64>().unwrap_or(0) * 100,
            |(w, c)| w.parse::<i64>().unwrap_or(0) * 100 + format!("{c:0<2}")[..2].parse::<i64>().unwrap_or(0),
        );
        let k = match weeks.iter().position(|w| w.0 == week) {
            Some(k) => k,
            None => {
                weeks.push((week.to_string(), 0, 0));
                weeks.len() - 1
            }
        };
        if sale_regions.iter().any(|s| s == region) {
            weeks[k].1 += cents;
        } else {
            weeks[k].2 += cents;
        }
    }
    weeks.sort_by(|a, b| a.0.cmp(&b.0));
    let mut out = String::from("week,sale_regions_revenue,other_regions_revenue\n");
    for (w, s, o) in &weeks {
        out.push_str(&format!("{w},{}.{:02},{}.{:02}\n", s / 100, s % 100, o / 100, o % 100));
    }
    (out, weeks.len())
}
