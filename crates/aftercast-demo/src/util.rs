//! Small helpers shared by the demo generators: file writing, fixed-decimal formatting,
//! dates and a few random draws.

use chrono::NaiveDate;
use rand::{Rng, RngExt};
use rand_distr::{Distribution, Gamma, Poisson, StandardNormal};
use std::path::Path;

use crate::WrittenFile;
use crate::error::{DemoError, DemoResult};

/// Writes `text` to `dir/rel` through a temporary name and a rename.
///
/// # Errors
/// [`DemoError::Io`] when the temporary file cannot be written or renamed.
pub fn write_file(dir: &Path, rel: &str, text: &str, rows: usize) -> DemoResult<WrittenFile> {
    let path = dir.join(rel);
    let tmp = dir.join(format!("{rel}.tmp"));
    std::fs::write(&tmp, text.as_bytes()).map_err(|source| DemoError::Io {
        path: tmp.clone(),
        what: "writing a demo file".to_string(),
        source,
    })?;
    std::fs::rename(&tmp, &path).map_err(|source| DemoError::Io {
        path: tmp.clone(),
        what: format!("renaming to {}", path.display()),
        source,
    })?;
    Ok(WrittenFile { path: rel.to_string(), rows })
}

/// A calendar date from constant parts (the demo only uses valid constant dates).
///
/// # Errors
/// [`DemoError::Invalid`] when the parts are not a calendar date.
pub fn date(y: i32, m: u32, d: u32) -> DemoResult<NaiveDate> {
    NaiveDate::from_ymd_opt(y, m, d).ok_or_else(|| DemoError::Invalid { what: format!("{y}-{m}-{d}") })
}

/// `YYYY-MM-DD`.
pub fn iso(d: NaiveDate) -> String {
    d.format("%Y-%m-%d").to_string()
}

/// Seconds since 1970-01-01T00:00:00Z of midnight UTC at the start of `d`.
pub fn epoch_seconds(d: NaiveDate) -> i64 {
    let epoch = NaiveDate::from_ymd_opt(1970, 1, 1).unwrap_or(NaiveDate::MIN);
    (d - epoch).num_days() * 86_400
}

/// `YYYY-MM-DDTHH:MM:SSZ` for seconds since the Unix epoch (UTC).
pub fn iso_timestamp(secs: i64) -> String {
    let days = secs.div_euclid(86_400);
    let rem = secs.rem_euclid(86_400);
    let epoch = NaiveDate::from_ymd_opt(1970, 1, 1).unwrap_or(NaiveDate::MIN);
    let d = epoch + chrono::Duration::days(days);
    format!("{}T{:02}:{:02}:{:02}Z", iso(d), rem / 3600, (rem % 3600) / 60, rem % 60)
}

/// Cents as dollars with exactly two decimals (`1234` -> `12.34`, `-5` -> `-0.05`).
pub fn cents(c: i64) -> String {
    let sign = if c < 0 { "-" } else { "" };
    let a = c.unsigned_abs();
    format!("{sign}{}.{:02}", a / 100, a % 100)
}

/// Dollars rounded to whole cents.
pub fn to_cents(dollars: f64) -> i64 {
    (dollars * 100.0).round() as i64
}

/// A standard normal draw.
pub fn std_normal<R: Rng + ?Sized>(rng: &mut R) -> f64 {
    StandardNormal.sample(rng)
}

/// A uniform draw on [0, 1).
pub fn uniform<R: Rng + ?Sized>(rng: &mut R) -> f64 {
    rng.random::<f64>()
}

/// A Bernoulli draw with probability `p` (clamped to [0, 1]).
pub fn bernoulli<R: Rng + ?Sized>(rng: &mut R, p: f64) -> bool {
    uniform(rng) < p.clamp(0.0, 1.0)
}

/// A Poisson count with mean `lambda` (0 when `lambda` is not positive).
///
/// # Errors
/// [`DemoError::Distribution`] when `lambda` is not finite or too large for `rand_distr`.
pub fn poisson<R: Rng + ?Sized>(rng: &mut R, lambda: f64) -> DemoResult<u64> {
    if lambda <= 0.0 {
        return Ok(0);
    }
    let d = Poisson::new(lambda)
        .map_err(|e| DemoError::Distribution { what: format!("Poisson mean {lambda}"), message: e.to_string() })?;
    let x: f64 = d.sample(rng);
    Ok(x as u64)
}

/// A Gamma draw with the given shape and mean.
///
/// # Errors
/// [`DemoError::Distribution`] when the shape or the scale is not positive and finite.
pub fn gamma_mean<R: Rng + ?Sized>(rng: &mut R, shape: f64, mean: f64) -> DemoResult<f64> {
    let d = Gamma::new(shape, mean / shape).map_err(|e| DemoError::Distribution {
        what: format!("Gamma shape {shape} mean {mean}"),
        message: e.to_string(),
    })?;
    Ok(d.sample(rng))
}

/// Index drawn from unnormalised weights.
pub fn categorical<R: Rng + ?Sized>(rng: &mut R, weights: &[f64]) -> usize {
    let total: f64 = weights.iter().sum();
    let mut u = uniform(rng) * total;
    for (i, w) in weights.iter().enumerate() {
        if u < *w {
            return i;
        }
        u -= w;
    }
    weights.len().saturating_sub(1)
}

/// The logistic function.
pub fn logistic(x: f64) -> f64 {
    1.0 / (1.0 + (-x).exp())
}

/// Distributes `target - sum(values)` over `values` (cents) so that their sum becomes
/// `target` exactly: one cent at a time to the entries in `order`, cycling. Used to make a
/// sample effect exactly a round number after rounding to cents.
pub fn fix_sum(values: &mut [i64], order: &[usize], target: i64) {
    let mut diff = target - values.iter().sum::<i64>();
    if order.is_empty() {
        return;
    }
    let mut k = 0;
    while diff != 0 {
        let i = order[k % order.len()];
        let step = diff.signum();
        if values[i] + step >= 0 {
            values[i] += step;
            diff -= step;
        }
        k += 1;
        if k > order.len() * 1_000_000 {
            break;
        }
    }
}
