//! Explicit policies for imperfect data. Policies are enums, never booleans.

use serde::{Deserialize, Serialize};

/// What to do with an empty (or `NA`) cell in a column an analysis needs.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum MissingPolicy {
    /// Refuse the file, naming the first empty cell (default).
    #[default]
    Error,
    /// Keep the row and mark the value missing. Series methods that can skip missing
    /// observations (the Kalman filter) use this; others refuse it.
    Keep,
    /// Drop the whole row and say how many rows were dropped.
    DropRow,
}

/// What to do when a dated series skips periods (e.g. a day absent from a daily file).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum GapPolicy {
    /// Refuse the file, naming the first gap (default).
    #[default]
    Error,
    /// Insert the skipped periods as missing observations.
    Fill,
}

impl std::str::FromStr for MissingPolicy {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s {
            "error" => Ok(Self::Error),
            "keep" => Ok(Self::Keep),
            "drop-row" | "drop" => Ok(Self::DropRow),
            other => Err(format!("'{other}' is not a missing-value policy (error, keep, drop-row)")),
        }
    }
}

impl std::str::FromStr for GapPolicy {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s {
            "error" => Ok(Self::Error),
            "fill" => Ok(Self::Fill),
            other => Err(format!("'{other}' is not a gap policy (error, fill)")),
        }
    }
}
