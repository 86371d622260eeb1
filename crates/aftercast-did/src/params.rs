//! Options of a rollout analysis.

use serde::{Deserialize, Serialize};

/// Which units a wave is compared with.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "kebab-case")]
pub enum Comparison {
    /// Units that never adopt inside the data.
    Never,
    /// Units that have not adopted yet at the period compared (including those that never do).
    #[default]
    NotYet,
}

impl Comparison {
    /// The option word.
    pub fn name(self) -> &'static str {
        match self {
            Comparison::Never => "never",
            Comparison::NotYet => "not-yet",
        }
    }
}

impl std::str::FromStr for Comparison {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, String> {
        match s {
            "never" => Ok(Comparison::Never),
            "not-yet" => Ok(Comparison::NotYet),
            _ => Err(format!("'{s}' is not a comparison group; use never or not-yet")),
        }
    }
}

/// The estimator of a rollout.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "kebab-case")]
pub enum Method {
    /// Group-time average effects (Callaway & Sant'Anna 2021), doubly robust with covariates
    /// (Sant'Anna & Zhao 2020).
    #[default]
    GroupTime,
    /// The imputation estimator (Borusyak, Jaravel & Spiess 2024).
    Imputation,
    /// The two-way fixed-effects regression (static, and the event study), a labelled baseline.
    Twfe,
}

impl Method {
    /// The option word.
    pub fn name(self) -> &'static str {
        match self {
            Method::GroupTime => "group-time",
            Method::Imputation => "imputation",
            Method::Twfe => "twfe",
        }
    }
}

impl std::str::FromStr for Method {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, String> {
        match s {
            "group-time" => Ok(Method::GroupTime),
            "imputation" => Ok(Method::Imputation),
            "twfe" => Ok(Method::Twfe),
            _ => Err(format!("'{s}' is not a rollout method; use group-time, imputation or twfe")),
        }
    }
}

/// Options of a rollout estimate.
///
/// | field | default | meaning |
/// | --- | --- | --- |
/// | `method` | group-time | estimator |
/// | `comparison` | not-yet | comparison units of group-time effects |
/// | `leads` | 6 | periods before adoption shown (and tested jointly) |
/// | `placebo_shifts` | 3 | fake adoption dates tried before the real rollout (0: none) |
#[derive(Debug, Clone, PartialEq)]
pub struct Spec {
    /// Estimator.
    pub method: Method,
    /// Comparison units (group-time effects; the imputation estimator always uses every
    /// not-yet-adopted unit-period, the two-way regression every unit-period).
    pub comparison: Comparison,
    /// Event times before adoption shown and tested.
    pub leads: usize,
    /// Number of fake adoption dates tried.
    pub placebo_shifts: usize,
}

impl Default for Spec {
    fn default() -> Self {
        Spec { method: Method::GroupTime, comparison: Comparison::NotYet, leads: 6, placebo_shifts: 3 }
    }
}
