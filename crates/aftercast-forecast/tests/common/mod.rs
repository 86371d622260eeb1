//! Shared helpers of the integration tests: the tolerance table and the data loaders.
#![allow(dead_code)]

/// Every tolerance of the reference tests, in one place.
pub mod tol {
    /// Nile MLE variances vs Durbin & Koopman (2012) Table 2.1: relative.
    pub const NILE_MLE_REL: f64 = 0.01;
    /// Nile log-likelihood vs published / statsmodels values: absolute.
    pub const NILE_LOGLIK_ABS: f64 = 1e-3;
    /// statsmodels UnobservedComponents log-likelihood at fixed parameters: relative.
    pub const SM_LOGLIK_REL: f64 = 1e-6;
    /// statsmodels filtered states and one-step forecasts: relative to max(1, |value|) scale.
    pub const SM_STATE_REL: f64 = 1e-6;
    /// statsmodels MLE parameters: relative.
    pub const SM_MLE_REL: f64 = 0.02;
    /// statsmodels ExponentialSmoothing fitted values and forecasts: relative.
    pub const HW_REL: f64 = 1e-8;
    /// statsmodels acorr_ljungbox statistic: relative.
    pub const LJUNG_BOX_REL: f64 = 1e-8;
}

/// Read a one-column-of-interest CSV (header, comma separated) into columns by name.
pub fn read_csv(path: &str) -> Vec<(String, Vec<f64>)> {
    let text = std::fs::read_to_string(path).expect("test data file");
    let mut lines = text.lines();
    let header: Vec<String> = lines.next().unwrap().split(',').map(|s| s.trim().to_string()).collect();
    let mut cols: Vec<Vec<f64>> = vec![Vec::new(); header.len()];
    for l in lines.filter(|l| !l.trim().is_empty()) {
        for (c, v) in l.split(',').enumerate() {
            cols[c].push(v.trim().parse::<f64>().unwrap_or(f64::NAN));
        }
    }
    header.into_iter().zip(cols).collect()
}

/// A column by name.
pub fn col(cols: &[(String, Vec<f64>)], name: &str) -> Vec<f64> {
    cols.iter().find(|(n, _)| n == name).map(|(_, v)| v.clone()).expect("column")
}

/// Relative difference with a floor of 1 on the scale.
pub fn rel(a: f64, b: f64) -> f64 {
    (a - b).abs() / b.abs().max(1.0)
}
