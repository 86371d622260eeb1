//! Study files: a TOML file that lists any number of analyses, each written with the same flags
//! as the verb it runs, so every analysis of a study is also one reproducible command line.
//!
//! ```toml
//! title = "What did the spring changes do?"
//!
//! [defaults]          # flags given to every analysis unless it sets them itself
//! level = 0.9
//! seed = 7
//!
//! [[analysis]]
//! name = "app-launch"                 # file-name-safe, unique
//! question = "app-orders"             # analyses with the same question are compared side by side
//! verb = "forecast"
//! describe = "Daily app orders after the 2 March launch"
//! [analysis.flags]
//! data = "data/app_daily.csv"         # paths are relative to the study file
//! time = "date"
//! outcome = "app_orders"
//! start = "2026-03-02"
//! ```
//!
//! Keys may be written with `_` or `-` (`log_controls` is `--log-controls`).
//! A flag's value is a string, number or boolean (`true` passes a bare switch such as `replace`),
//! or an array (repeated flag, e.g. `season = ["7", "365.25:4"]`).

use crate::failure::bad_input_msg;
use serde::Deserialize;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// A parsed study file.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Study {
    /// Title of the report.
    pub title: String,
    /// A paragraph saying what the study asks.
    #[serde(default)]
    pub summary: Option<String>,
    /// Flags given to every analysis.
    #[serde(default)]
    pub defaults: BTreeMap<String, toml::Value>,
    /// The analyses, run in order.
    #[serde(rename = "analysis", default)]
    pub analyses: Vec<AnalysisSpec>,
    /// Plain-language answers to each question key, for the triangulation section.
    #[serde(default)]
    pub questions: BTreeMap<String, String>,
}

/// One analysis of a study.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct AnalysisSpec {
    /// Unique, file-name-safe name.
    pub name: String,
    /// Question key: analyses sharing it answer the same question.
    #[serde(default)]
    pub question: Option<String>,
    /// The verb to run (an analysis verb).
    pub verb: String,
    /// One line for the report.
    #[serde(default)]
    pub describe: Option<String>,
    /// The true effect, when known (demo, simulations): shown next to the estimate.
    #[serde(default)]
    pub truth: Option<f64>,
    /// Which summary the truth refers to: "average", "cumulative" or "relative".
    #[serde(default)]
    pub truth_of: Option<String>,
    /// The verb's flags, without the leading `--`.
    #[serde(default)]
    pub flags: BTreeMap<String, toml::Value>,
}

/// Flags a study may not set: outputs belong to the study run.
const RESERVED: &[&str] = &["json", "out", "force", "quiet", "threads"];

/// Flags whose values are input files, resolved against the study file's folder.
pub(crate) const PATH_FLAGS: &[&str] =
    &["data", "events", "experiment", "pool", "exposures", "calendar", "plasmode", "arms-data", "summarize", "starts"];

/// Flags whose values are files the analysis writes: they resolve inside the run's output
/// folder, and absolute paths or `..` are refused (a study never writes outside `--out`).
const OUTPUT_FLAGS: &[&str] = &["partial", "history", "output", "series-output", "sidecar"];

/// Prefix of an input path that names a file an earlier analysis of the run wrote inside the
/// output folder (`data = "out:tables/windows.csv"`).
pub const FROM_OUT: &str = "out:";

impl Study {
    /// Read and check a study file.
    ///
    /// # Errors
    /// Bad input for unreadable or malformed files, duplicate or unsafe names, reserved flags.
    pub fn read(path: &Path) -> anyhow::Result<Study> {
        let bytes = aftercast_core::table::read_input(path)?;
        let text = String::from_utf8(bytes)
            .map_err(|_| bad_input_msg(format!("{}: a study file must be UTF-8 text", path.display())))?;
        let study: Study = toml::from_str(&text).map_err(|e| {
            let line = e.span().map(|s| text[..s.start.min(text.len())].matches('\n').count() + 1);
            let at = line.map(|l| format!(", line {l}")).unwrap_or_default();
            bad_input_msg(format!("{}{at}: not a valid study file: {}", path.display(), one_line(e.message())))
        })?;
        let mut seen = std::collections::HashSet::new();
        if study.analyses.is_empty() {
            return Err(bad_input_msg(format!("{}: the study lists no [[analysis]]", path.display())));
        }
        for a in &study.analyses {
            // the name becomes file names (analyses/<name>.json, charts/<name>-*.png)
            if a.name.is_empty()
                || a.name.len() > 64
                || !a.name.chars().all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_')
            {
                return Err(bad_input_msg(format!(
                    "{}: analysis name '{}' must be 1 to 64 letters, digits, '-' or '_'",
                    path.display(),
                    aftercast_core::error::shown(&a.name)
                )));
            }
            if !seen.insert(a.name.clone()) {
                return Err(bad_input_msg(format!("{}: analysis name '{}' appears twice", path.display(), a.name)));
            }
            for k in a.flags.keys().chain(study.defaults.keys()) {
                if RESERVED.contains(&k.as_str()) {
                    return Err(bad_input_msg(format!(
                        "{}: analysis '{}': flag '{k}' is set by the study run and may not be given",
                        path.display(),
                        a.name
                    )));
                }
            }
        }
        Ok(study)
    }

    /// The argument vector of one analysis (`aftercast <verb> --flag value ...`), with input
    /// paths resolved against `base` (the study file's folder) and output paths inside `out`.
    ///
    /// # Errors
    /// Bad input for flag values of an unsupported type, and for an output path that would
    /// leave `out`.
    pub fn argv(&self, a: &AnalysisSpec, base: &Path, out: &Path) -> anyhow::Result<Vec<String>> {
        // a verb of two words ("plan forecast") is a verb and its kind
        let mut argv = vec!["aftercast".to_string()];
        argv.extend(a.verb.split_whitespace().map(String::from));
        let mut merged: BTreeMap<&str, &toml::Value> = BTreeMap::new();
        // defaults are inference options (level, seed, draws, ...): a table-building step has none
        if a.verb.trim() != "windows" {
            for (k, v) in &self.defaults {
                merged.insert(k, v);
            }
        }
        for (k, v) in &a.flags {
            merged.insert(k, v);
        }
        for (k, v) in merged {
            // `log_controls` in TOML is the flag `--log-controls`.
            let k = k.replace('_', "-");
            let k = k.as_str();
            let values: Vec<&toml::Value> = match v {
                toml::Value::Array(items) => items.iter().collect(),
                other => vec![other],
            };
            for v in values {
                let text = match v {
                    toml::Value::String(s) => s.clone(),
                    toml::Value::Integer(i) => i.to_string(),
                    toml::Value::Float(f) => f.to_string(),
                    toml::Value::Boolean(true) => {
                        argv.push(format!("--{k}"));
                        continue;
                    }
                    toml::Value::Boolean(false) => continue,
                    other => {
                        return Err(bad_input_msg(format!(
                            "analysis '{}': flag '{k}' has a value of type {} (use a string, number, boolean or array)",
                            a.name,
                            other.type_str()
                        )));
                    }
                };
                let text = if PATH_FLAGS.contains(&k)
                    && let Some(rest) = text.strip_prefix(FROM_OUT)
                {
                    inside(out, rest).ok_or_else(|| {
                        bad_input_msg(format!(
                            "analysis '{}': key '{k}' = '{text}' must name a file inside the output folder after '{FROM_OUT}' (no absolute path, no '..')",
                            a.name
                        ))
                    })?
                } else if PATH_FLAGS.contains(&k) {
                    let resolved = resolve(base, &text);
                    // known as an input before any analysis writes: no output may replace it
                    aftercast_core::output::register_input(Path::new(&resolved));
                    resolved
                } else if OUTPUT_FLAGS.contains(&k) {
                    inside(out, &text).ok_or_else(|| {
                        bad_input_msg(format!(
                            "analysis '{}': key '{k}' = '{text}' must name a file inside the output folder (no absolute path, no '..')",
                            a.name
                        ))
                    })?
                } else {
                    text
                };
                argv.push(format!("--{k}"));
                argv.push(text);
            }
        }
        Ok(argv)
    }
}

/// `p` under `out`, when it is a relative path without `..`.
fn inside(out: &Path, p: &str) -> Option<String> {
    use std::path::Component;
    let path = Path::new(p);
    let ok = !p.is_empty() && path.components().all(|c| matches!(c, Component::Normal(_) | Component::CurDir));
    ok.then(|| out.join(path).to_string_lossy().into_owned())
}

/// The first line of a message, for one-line errors.
pub fn one_line(msg: &str) -> String {
    msg.lines().map(str::trim).find(|l| !l.is_empty()).unwrap_or("").to_string()
}

fn resolve(base: &Path, p: &str) -> String {
    let path = PathBuf::from(p);
    if path.is_absolute() { p.to_string() } else { base.join(path).to_string_lossy().into_owned() }
}

/// Quote an argument vector as a shell command a user can paste (POSIX shell quoting by
/// `shlex`). No shell can pass an argument holding a NUL byte; such an argument is shown with
/// each NUL written as `\0`, so that line is for reading only.
pub fn shell_line(argv: &[String]) -> String {
    shlex::try_join(argv.iter().map(String::as_str)).unwrap_or_else(|_| {
        argv.iter()
            .map(|a| {
                let shown = a.replace('\0', "\\0");
                shlex::try_quote(&shown).map(|q| q.into_owned()).unwrap_or(shown)
            })
            .collect::<Vec<_>>()
            .join(" ")
    })
}
