//! aftercast-report: the plain terminal summary of a result and atomic JSON output.
//! Charts and the HTML report build on the same [`AnalysisResult`].

pub mod charts;
pub mod html;

use aftercast_core::result::{AnalysisResult, RopeUnits, Summary};
use std::io::Write;
use std::path::Path;

/// The caution printed beside every observational estimate.
pub const CAUTION: &str = "Caution: this is an observational estimate. It rests on assumptions that no data \
can prove (listed above); a randomized test is stronger evidence wherever one is possible.";

/// Errors of the output layer.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum ReportError {
    /// A file could not be written.
    #[error("{}: cannot write", path.display())]
    Write {
        /// The target path.
        path: std::path::PathBuf,
        /// The cause.
        #[source]
        source: std::io::Error,
    },
    /// The result could not be serialised.
    #[error("cannot serialise the result: {0}")]
    Json(#[from] serde_json::Error),
}

/// Write bytes to `path` atomically: a temporary file in the same folder, then a rename.
///
/// # Errors
/// [`ReportError::Write`].
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<(), ReportError> {
    let err = |source| ReportError::Write { path: path.to_path_buf(), source };
    let dir = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => std::path::PathBuf::from("."),
    };
    std::fs::create_dir_all(&dir).map_err(err)?;
    let mut tmp = tempfile::Builder::new().prefix(".aftercast-").suffix(".tmp").tempfile_in(&dir).map_err(err)?;
    tmp.write_all(bytes).map_err(err)?;
    tmp.as_file().sync_all().map_err(err)?;
    tmp.persist(path).map_err(|e| err(e.error))?;
    Ok(())
}

/// Serialise any result document as pretty JSON and write it atomically.
///
/// # Errors
/// [`ReportError`].
pub fn write_json<T: serde::Serialize>(path: &Path, value: &T) -> Result<(), ReportError> {
    let mut bytes = serde_json::to_vec_pretty(value)?;
    bytes.push(b'\n');
    write_atomic(path, &bytes)
}

/// Format a number for people: thousands separators, sensible decimals, explicit sign.
pub fn fmt_signed(v: f64) -> String {
    if !v.is_finite() {
        return "n/a".into();
    }
    let sign = if v < 0.0 { "-" } else { "+" };
    format!("{sign}{}", fmt_abs(v.abs()))
}

/// Format a non-negative magnitude with three significant figures (at least), grouped.
pub fn fmt_abs(a: f64) -> String {
    let decimals = if a >= 1000.0 {
        0
    } else if a >= 100.0 {
        1
    } else if a >= 1.0 {
        2
    } else if a == 0.0 {
        0
    } else {
        (3.0 - a.log10().floor()).clamp(2.0, 8.0) as usize
    };
    let s = format!("{a:.decimals$}");
    let (int, frac) = match s.split_once('.') {
        Some((i, f)) => (i.to_string(), Some(f.to_string())),
        None => (s, None),
    };
    let mut grouped = String::new();
    for (i, c) in int.chars().enumerate() {
        if i > 0 && (int.len() - i) % 3 == 0 {
            grouped.push(',');
        }
        grouped.push(c);
    }
    match frac {
        Some(f) => format!("{grouped}.{f}"),
        None => grouped,
    }
}

/// Format a fraction as a signed percentage.
pub fn fmt_pct(v: f64) -> String {
    if !v.is_finite() {
        return "n/a".into();
    }
    format!("{:+.2}%", v * 100.0)
}

fn interval_line(label: &str, s: &Summary, level: f64, pct: bool) -> String {
    let f = |v: f64| if pct { fmt_pct(v) } else { fmt_signed(v) };
    format!(
        "  {label:<17}{:>12}   {:.0}% interval [{}, {}]   HDI [{}, {}]",
        f(s.mean),
        level * 100.0,
        f(s.lower),
        f(s.upper),
        f(s.hdi_lower),
        f(s.hdi_upper)
    )
}

/// A few plain lines: the numbers, the verdict in words, the warnings, the assumptions and the
/// caution that observational estimates rest on untestable assumptions.
pub fn terminal_summary(r: &AnalysisResult, headline: &str) -> String {
    let mut out = Vec::new();
    out.push(format!("aftercast {} ({}): {headline}", r.verb, r.method));
    let per = if r.estimand.is_some() && r.path.is_none() { "per unit" } else { "per period" };
    out.push(interval_line(&format!("average {per}"), &r.effect.average, r.level, false));
    if let Some(c) = &r.effect.cumulative {
        out.push(interval_line("total", c, r.level, false));
    }
    if let Some(rel) = &r.effect.relative {
        out.push(interval_line("relative", rel, r.level, true));
    }
    out.push(format!("  chance the effect is above zero: {:.1}%", r.effect.average.prob_positive * 100.0));
    if let Some(p) = r.effect.average.prob_above_threshold {
        out.push(format!("  chance the effect is above the threshold: {:.1}%", p * 100.0));
    }
    let rope = match r.rope.units {
        RopeUnits::Percent => format!("{} to {} of the counterfactual", fmt_pct(r.rope.low), fmt_pct(r.rope.high)),
        RopeUnits::Outcome => format!("{} to {} in outcome units", fmt_signed(r.rope.low), fmt_signed(r.rope.high)),
    };
    out.push(format!(
        "  verdict: {}. {} (smallest effect that matters: outside {rope})",
        r.verdict.word(),
        r.verdict.sentence()
    ));
    for w in &r.warnings {
        out.push(format!("  warning: {w}"));
    }
    if !r.assumptions.is_empty() {
        out.push("  this rests on:".into());
        for a in &r.assumptions {
            out.push(format!("    - {a}"));
        }
    }
    out.push(format!("  {CAUTION}"));
    out.join("\n") + "\n"
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn numbers_are_grouped_and_signed() {
        assert_eq!(fmt_signed(1794.34), "+1,794");
        assert_eq!(fmt_signed(-8498.0), "-8,498");
        assert_eq!(fmt_signed(12.345), "+12.35");
        assert_eq!(fmt_pct(0.0312), "+3.12%");
        assert_eq!(fmt_abs(1_234_567.0), "1,234,567");
        assert_eq!(fmt_abs(0.01234), "0.01234");
    }

    #[test]
    fn atomic_write_replaces_whole_file() {
        let dir = tempfile::tempdir().expect("tempdir");
        let p = dir.path().join("r.json");
        write_atomic(&p, b"first").expect("write");
        write_atomic(&p, b"second").expect("write");
        assert_eq!(std::fs::read(&p).expect("read"), b"second");
        let leftovers = std::fs::read_dir(dir.path()).expect("dir").count();
        assert_eq!(leftovers, 1);
    }
}
