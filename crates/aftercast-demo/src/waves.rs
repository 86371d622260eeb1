//! `price_waves.csv` and `price_waves_starts.csv`: weekly trail-footwear orders of the 40
//! regions over 78 weeks (Mondays from 2025-01-06 to 2026-06-29), with a lower footwear price
//! reaching 30 regions in three waves of ten (weeks of 2025-10-06, 2026-01-12 and 2026-04-06);
//! ten regions keep the old price to the end.
//!
//! Model (orders, week `w` from 0): `orders = base_r + 70 s(w) + d(w) + e_rw + effect`, where
//! `base_r` is 55 orders per store (store count 2 to 14, a region factor with sd 15%), `s` the
//! yearly outdoor season shared by every region, `d` a national demand factor in orders (AR(1),
//! phi 0.9, innovation sd 6) and `e_rw` the region's own noise (AR(1), phi 0.4, innovation sd
//! 4 + 2% of its base). The trends are shared in orders, so the waves' untreated paths are
//! parallel by construction. The waves are drawn at random from the regions.
//!
//! The effect grows with the weeks since adoption `k` and is larger in later waves: the region's
//! base times `m_j (0.02 + 0.06 (1 - exp(-k / 10)))`, with `m_j` 1.0, 1.15 and 1.3 for waves 1
//! to 3. The truth is computed from the written whole orders (observed minus counterfactual).

use chrono::{Duration, NaiveDate};
use serde::Serialize;

use crate::error::DemoResult;
use crate::regions::REGIONS;
use crate::util::{date, iso, std_normal, uniform};
use aftercast_resample::rng::Stream;

/// Number of weeks.
pub const WEEKS: usize = 78;
/// Wave multipliers of the effect.
pub const WAVE_MULTIPLIER: [f64; 3] = [1.0, 1.15, 1.3];

/// The effect of a region of base `base` in wave `j` at `k` weeks since adoption (orders).
pub fn effect(base: f64, j: usize, k: usize) -> f64 {
    base * WAVE_MULTIPLIER[j] * (0.02 + 0.06 * (1.0 - (-(k as f64) / 10.0).exp()))
}

/// One wave of the truth.
#[derive(Debug, Clone, Serialize)]
pub struct WaveTruth {
    /// First week at the new price.
    pub start: String,
    /// Its regions.
    pub regions: Vec<String>,
    /// Mean effect per region-week of the wave (orders).
    pub average_effect: f64,
}

/// The truth of the price waves.
#[derive(Debug, Clone, Serialize)]
pub struct PriceWavesTruth {
    /// First week of the data.
    pub first_week: String,
    /// Last week of the data.
    pub last_week: String,
    /// The waves in order.
    pub waves: Vec<WaveTruth>,
    /// Regions that keep the old price.
    pub never: Vec<String>,
    /// Mean effect per adopted region-week (orders): the rollout's estimand.
    pub sample_att: f64,
    /// Summed effect over summed counterfactual, over the adopted region-weeks.
    pub relative_effect: f64,
    /// Adopted region-weeks.
    pub adopted_region_weeks: usize,
    /// Mean effect by weeks since adoption (k = 0, 1, ...), over the waves observed at k.
    pub by_weeks_since: Vec<f64>,
}

/// Generated files and their truth.
#[derive(Debug, Clone)]
pub struct PriceWavesData {
    /// `price_waves.csv`.
    pub csv: String,
    /// Its data rows.
    pub rows: usize,
    /// `price_waves_starts.csv`.
    pub starts_csv: String,
    /// Its data rows.
    pub start_rows: usize,
    /// The truth.
    pub truth: PriceWavesTruth,
}

fn season(day: f64) -> f64 {
    // day: days since 2024-01-01; summer peak near day 172, a December bump
    let theta = 2.0 * std::f64::consts::PI * (day - 172.0) / 365.25;
    let d = (day - 345.0).rem_euclid(365.25);
    theta.cos() + 0.4 * (-(d.min(365.25 - d) / 12.0).powi(2)).exp()
}

/// Generates the price-wave files.
///
/// # Errors
/// Only from building the fixed dates.
pub fn generate(seed: u64, stream: u64) -> DemoResult<PriceWavesData> {
    let mut rng = Stream::new(seed, stream);
    let first: NaiveDate = date(2025, 1, 6)?;
    let origin = date(2024, 1, 1)?;
    let weeks: Vec<NaiveDate> = (0..WEEKS as i64).map(|w| first + Duration::days(7 * w)).collect();
    let starts = [date(2025, 10, 6)?, date(2026, 1, 12)?, date(2026, 4, 6)?];
    let start_idx: Vec<usize> = starts.iter().map(|s| weeks.iter().position(|w| w == s).unwrap_or(WEEKS)).collect();

    let n = REGIONS.len();
    let stores: Vec<u32> = (0..n).map(|_| 2 + (uniform(&mut rng) * 13.0) as u32).collect();
    let base: Vec<f64> = stores.iter().map(|&s| s as f64 * 55.0 * (0.15 * std_normal(&mut rng)).exp()).collect();
    // waves at random: a shuffled order, ten per wave, the last ten never
    let mut order: Vec<usize> = (0..n).collect();
    for i in (1..n).rev() {
        let j = (uniform(&mut rng) * (i + 1) as f64) as usize;
        order.swap(i, j.min(i));
    }
    let mut wave_of: Vec<Option<usize>> = vec![None; n];
    for (pos, &r) in order.iter().enumerate() {
        if pos < 30 {
            wave_of[r] = Some(pos / 10);
        }
    }
    let mut demand = 0.0;
    let d: Vec<f64> = (0..WEEKS)
        .map(|_| {
            demand = 0.9 * demand + 6.0 * std_normal(&mut rng);
            demand
        })
        .collect();
    let median_stores = {
        let mut s = stores.clone();
        s.sort_unstable();
        s[n / 2]
    };
    let mut csv = String::from("region,week,orders,store_count,size_band\n");
    let (mut eff_sum, mut cf_sum, mut cells) = (0i64, 0i64, 0usize);
    let mut wave_sums = [(0i64, 0usize); 3];
    let mut by_k: Vec<(i64, usize)> = vec![(0, 0); WEEKS];
    for r in 0..n {
        let mut noise = 0.0;
        let band = if stores[r] >= median_stores { "large" } else { "small" };
        for (w, week) in weeks.iter().enumerate() {
            noise = 0.4 * noise + (4.0 + 0.02 * base[r]) * std_normal(&mut rng);
            let day = (*week - origin).num_days() as f64 + 3.0;
            let cf = (base[r] + 70.0 * season(day) + d[w] + noise).round().max(0.0) as i64;
            let obs = match wave_of[r] {
                Some(j) if w >= start_idx[j] => {
                    let k = w - start_idx[j];
                    let o = (cf as f64 + effect(base[r], j, k)).round() as i64;
                    eff_sum += o - cf;
                    cf_sum += cf;
                    cells += 1;
                    wave_sums[j].0 += o - cf;
                    wave_sums[j].1 += 1;
                    by_k[k].0 += o - cf;
                    by_k[k].1 += 1;
                    o
                }
                _ => cf,
            };
            csv.push_str(&format!("{},{},{},{},{}\n", REGIONS[r], iso(*week), obs, stores[r], band));
        }
    }
    let mut starts_csv = String::from("region,start\n");
    for r in 0..n {
        let s = wave_of[r].map(|j| iso(starts[j])).unwrap_or_default();
        starts_csv.push_str(&format!("{},{}\n", REGIONS[r], s));
    }
    let waves = (0..3)
        .map(|j| WaveTruth {
            start: iso(starts[j]),
            regions: (0..n).filter(|&r| wave_of[r] == Some(j)).map(|r| REGIONS[r].to_string()).collect(),
            average_effect: wave_sums[j].0 as f64 / wave_sums[j].1.max(1) as f64,
        })
        .collect();
    Ok(PriceWavesData {
        csv,
        rows: n * WEEKS,
        starts_csv,
        start_rows: n,
        truth: PriceWavesTruth {
            first_week: iso(weeks[0]),
            last_week: iso(weeks[WEEKS - 1]),
            waves,
            never: (0..n).filter(|&r| wave_of[r].is_none()).map(|r| REGIONS[r].to_string()).collect(),
            sample_att: eff_sum as f64 / cells as f64,
            relative_effect: eff_sum as f64 / cf_sum as f64,
            adopted_region_weeks: cells,
            by_weeks_since: by_k.iter().take_while(|(_, c)| *c > 0).map(|(s, c)| *s as f64 / *c as f64).collect(),
        },
    })
}
