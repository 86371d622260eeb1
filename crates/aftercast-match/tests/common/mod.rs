//! Shared loaders and the one place where the tolerances of the reference tests live.
#![allow(dead_code)]

use aftercast_core::table::RawTable;
use aftercast_core::units::{UnitSpec, UnitTable};
use std::path::{Path, PathBuf};

/// Tolerances of every reference test of this crate.
pub mod tol {
    /// Logistic coefficients and log-likelihood against statsmodels: relative.
    pub const LOGIT_REL: f64 = 1e-6;
    /// Exact binomial tail against scipy.stats.binomtest: absolute.
    pub const BINOM_ABS: f64 = 1e-12;
    /// Normal-approximation signed-rank p-value against scipy.stats.wilcoxon: absolute.
    pub const WILCOXON_ABS: f64 = 1e-10;
    /// Raw difference against Dehejia & Wahba (1999), who report whole dollars.
    pub const RAW_DIFF_DOLLARS: f64 = 1.0;
    /// E-values against VanderWeele & Ding (2017), who report 3 decimals (7.263) and 1 (3.0).
    pub const EVALUE_3DP: f64 = 5e-4;
    /// One-decimal E-value.
    pub const EVALUE_1DP: f64 = 0.05;
}

pub fn data_dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests").join("data")
}

/// The observational sample of Dehejia & Wahba (1999): the 185 NSW treated units and the
/// 15,992 CPS-1 comparison units, with the zero-earnings indicators kept as model terms.
pub fn nsw_cps1() -> UnitTable {
    let nsw = std::fs::read_to_string(data_dir().join("nsw_dehejia_wahba.csv")).unwrap();
    let cps = std::fs::read_to_string(data_dir().join("cps1_comparison.csv")).unwrap();
    let mut text = String::new();
    let mut lines = nsw.lines();
    text.push_str(lines.next().unwrap());
    text.push('\n');
    for l in lines.filter(|l| l.starts_with("1,")) {
        text.push_str(l);
        text.push('\n');
    }
    for l in cps.lines().skip(1) {
        text.push_str(l);
        text.push('\n');
    }
    let table = RawTable::from_csv_bytes(Path::new("nsw_treated_cps1.csv"), text.as_bytes()).unwrap();
    let spec = UnitSpec {
        treatment: "treat".into(),
        outcomes: vec!["re78".into()],
        numeric: ["age", "educ", "marr", "nodegree", "black", "hisp", "re74", "re75"]
            .iter()
            .map(|s| s.to_string())
            .collect(),
        ..Default::default()
    };
    UnitTable::from_table(&table, &spec).unwrap()
}

/// The Dehejia & Wahba (1999) CPS propensity specification (their Table 2 note, as we read it):
/// age, age^2, age^3, educ, educ^2, married, no degree, black, hispanic, re74, re75,
/// u74, u75, educ x re74.
pub fn dw_terms() -> Vec<aftercast_match::design::Term> {
    ["age^2", "age^3", "educ^2", "zero(re74)", "zero(re75)", "educ:re74"].iter().map(|t| t.parse().unwrap()).collect()
}

pub const DW_COVARIATES: [&str; 8] = ["age", "educ", "marr", "nodegree", "black", "hisp", "re74", "re75"];

pub fn reference() -> serde_json::Value {
    let p = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests").join("reference").join("reference.json");
    serde_json::from_str(&std::fs::read_to_string(p).unwrap()).unwrap()
}
