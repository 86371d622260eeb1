//! Resource bounds from what the machine can hold. Before allocating draws x periods,
//! replicates, gap-filled axes or categorical expansions, a verb asks [`check`] whether the
//! estimate fits; a request that does not is refused with the flag, the memory it would need and
//! the largest value that fits, instead of an allocation abort.

use crate::error::DataError;

/// Share of the memory available now that one request may take.
const SHARE: f64 = 0.5;

/// Memory available to this process now, in bytes: `MemAvailable` of /proc/meminfo, capped by
/// an address-space limit (`ulimit -v`) when one is set; 4 GiB where neither can be read.
pub fn available_bytes() -> u64 {
    let mut avail = meminfo_available().unwrap_or(4 << 30);
    if let Some(limit) = address_space_limit() {
        avail = avail.min(limit);
    }
    avail
}

fn meminfo_available() -> Option<u64> {
    let text = std::fs::read_to_string("/proc/meminfo").ok()?;
    let line = text.lines().find(|l| l.starts_with("MemAvailable:"))?;
    let kb: u64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kb.saturating_mul(1024))
}

fn address_space_limit() -> Option<u64> {
    let text = std::fs::read_to_string("/proc/self/limits").ok()?;
    let line = text.lines().find(|l| l.starts_with("Max address space"))?;
    let soft = line.split_whitespace().nth(3)?;
    soft.parse().ok()
}

fn human(bytes: f64) -> String {
    if bytes >= 1e9 {
        format!("{:.1} GB", bytes / 1e9)
    } else if bytes >= 1e6 {
        format!("{:.0} MB", bytes / 1e6)
    } else {
        format!("{:.0} kB", bytes / 1e3)
    }
}

/// Check that `count` items of `bytes_each` (plus `fixed` bytes) fit in memory.
///
/// # Errors
/// [`DataError::BadArgument`] naming `flag`, the memory needed, what is free and the largest
/// count that fits.
pub fn check(flag: &str, count: u64, bytes_each: u64, fixed: u64) -> Result<(), DataError> {
    check_against(flag, count, bytes_each, fixed, available_bytes())
}

/// [`check`] against a given amount of free memory (for tests).
///
/// # Errors
/// As [`check`].
pub fn check_against(flag: &str, count: u64, bytes_each: u64, fixed: u64, available: u64) -> Result<(), DataError> {
    let need = count as f64 * bytes_each as f64 + fixed as f64;
    let allowed = available as f64 * SHARE;
    if need <= allowed {
        return Ok(());
    }
    let largest = ((allowed - fixed as f64) / bytes_each.max(1) as f64).floor().max(0.0) as u64;
    Err(DataError::BadArgument {
        what: flag.to_string(),
        text: count.to_string(),
        detail: format!(
            "this needs about {} of memory and about {} is free; at most {largest} fits",
            human(need),
            human(available as f64)
        ),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_request_beyond_memory_names_the_flag_and_the_largest_value() {
        // 1e9 replicates of 32 bytes against 8 GB free: 32 GB needed, at most 4e9 / 32 = 125e6.
        let e = check_against("--replicates", 1_000_000_000, 32, 0, 8_000_000_000).expect_err("too big");
        let text = e.to_string();
        assert!(text.contains("--replicates") && text.contains("125000000"), "{text}");
        assert!(check_against("--replicates", 1000, 32, 0, 8_000_000_000).is_ok());
        // u64::MAX items never overflow the estimate
        assert!(check_against("--replicates", u64::MAX, 32, 0, 8_000_000_000).is_err());
        assert!(available_bytes() > 0);
    }
}
