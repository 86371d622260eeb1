//! The propensity-model design: numeric covariates, one-hot categoricals and named derived
//! terms (powers, products, zero indicators), standardised column by column.
//!
//! Term syntax (ours; see docs/match.md):
//!
//! | written                    | column                                        |
//! | -------------------------- | --------------------------------------------- |
//! | `tenure_months^2`          | tenure squared (`^k` for any k in 2..=4)      |
//! | `visits_pre:spend_pre`     | product of visits_pre and spend_pre           |
//! | `tenure_months^2:visits_pre` | factors multiply; each may carry a power    |
//! | `zero(spend_pre)`          | 1 if spend_pre == 0, else 0                   |
//! | `log1p(spend_pre)`         | ln(1 + spend_pre) (spend_pre > -1)            |
//!
//! `--squares tenure_months,visits_pre` is shorthand for the terms
//! `tenure_months^2,visits_pre^2`; `--interact visits_pre:spend_pre` adds the product term.
use rayon::prelude::*;

use crate::error::{MatchError, MatchResult};
use aftercast_core::units::UnitTable;
use serde::{Deserialize, Serialize};

/// One factor of a term.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub enum Factor {
    /// A numeric covariate raised to a power (1 = the covariate itself).
    Power {
        /// Covariate name.
        name: String,
        /// Exponent, 1..=4.
        power: u32,
    },
    /// Indicator that a numeric covariate equals zero.
    Zero {
        /// Covariate name.
        name: String,
    },
    /// ln(1 + x) of a numeric covariate (skewed amounts such as spend).
    Log1p {
        /// Covariate name.
        name: String,
    },
}

impl Factor {
    /// The column the factor is computed from.
    pub fn column(&self) -> &str {
        match self {
            Factor::Power { name, .. } | Factor::Zero { name } | Factor::Log1p { name } => name,
        }
    }
}

/// A derived model term: the product of its factors.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Term {
    /// Factors multiplied together.
    pub factors: Vec<Factor>,
}

impl Term {
    /// The square of a covariate.
    pub fn square(name: &str) -> Term {
        Term { factors: vec![Factor::Power { name: name.into(), power: 2 }] }
    }

    /// The product of two covariates.
    pub fn product(a: &str, b: &str) -> Term {
        Term { factors: vec![Factor::Power { name: a.into(), power: 1 }, Factor::Power { name: b.into(), power: 1 }] }
    }

    /// The column name as written (`age^2`, `educ:re74`, `zero(re74)`).
    pub fn label(&self) -> String {
        self.factors
            .iter()
            .map(|f| match f {
                Factor::Power { name, power: 1 } => name.clone(),
                Factor::Power { name, power } => format!("{name}^{power}"),
                Factor::Zero { name } => format!("zero({name})"),
                Factor::Log1p { name } => format!("log1p({name})"),
            })
            .collect::<Vec<_>>()
            .join(":")
    }

    fn value(&self, cols: &[&[f64]], i: usize) -> f64 {
        let mut v = 1.0;
        for (f, c) in self.factors.iter().zip(cols) {
            let x = c[i];
            v *= match f {
                Factor::Power { power, .. } => x.powi(*power as i32),
                Factor::Zero { .. } => {
                    if x == 0.0 {
                        1.0
                    } else {
                        0.0
                    }
                }
                Factor::Log1p { .. } => x.ln_1p(),
            };
        }
        v
    }

    fn names(&self) -> impl Iterator<Item = &str> {
        self.factors.iter().map(|f| match f {
            Factor::Power { name, .. } | Factor::Zero { name } | Factor::Log1p { name } => name.as_str(),
        })
    }
}

impl std::str::FromStr for Term {
    type Err = MatchError;
    fn from_str(s: &str) -> MatchResult<Term> {
        let bad = |detail: &str| MatchError::BadTerm { text: s.to_string(), detail: detail.to_string() };
        let t = s.trim();
        if t.is_empty() {
            return Err(bad("empty term"));
        }
        let mut factors = Vec::new();
        for part in t.split(':') {
            let p = part.trim();
            if p.is_empty() {
                return Err(bad("empty factor around ':'"));
            }
            if let Some(inner) = p.strip_prefix("log1p(") {
                let name = inner.strip_suffix(')').ok_or_else(|| bad("log1p( needs a closing parenthesis"))?.trim();
                if name.is_empty() {
                    return Err(bad("log1p() needs a covariate name"));
                }
                factors.push(Factor::Log1p { name: name.to_string() });
            } else if let Some(inner) = p.strip_prefix("zero(") {
                let name = inner.strip_suffix(')').ok_or_else(|| bad("zero( needs a closing parenthesis"))?.trim();
                if name.is_empty() {
                    return Err(bad("zero() needs a covariate name"));
                }
                factors.push(Factor::Zero { name: name.to_string() });
            } else if let Some((name, pow)) = p.split_once('^') {
                let power: u32 = pow.trim().parse().map_err(|_| bad("the power after '^' must be a whole number"))?;
                if !(1..=4).contains(&power) {
                    return Err(bad("powers from 1 to 4 are allowed"));
                }
                let name = name.trim();
                if name.is_empty() {
                    return Err(bad("a covariate name must come before '^'"));
                }
                factors.push(Factor::Power { name: name.to_string(), power });
            } else {
                if p.contains('(') || p.contains(')') {
                    return Err(bad("the functions are zero(name) and log1p(name)"));
                }
                factors.push(Factor::Power { name: p.to_string(), power: 1 });
            }
        }
        if factors.len() == 1 && matches!(factors[0], Factor::Power { power: 1, .. }) {
            return Err(bad("a plain covariate belongs in the covariate list, not in the terms"));
        }
        Ok(Term { factors })
    }
}

/// What kind of source a design column has.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum ColumnKind {
    /// A numeric covariate as given.
    Numeric,
    /// One level of a categorical covariate (the first level is the reference).
    Level,
    /// A derived term.
    Term,
}

/// Rows handled by one task when the design is filled and summed in parallel.
const ROWS_PER_TASK: usize = 8192;

/// Where a design column's values come from.
enum Source<'a> {
    Numeric(&'a [f64]),
    Level(&'a [usize], usize),
    Term(&'a Term, Vec<&'a [f64]>),
}

/// Work done over one column's values at given rows, with the source resolved once (not per
/// value).
trait OverValues {
    type Out;
    fn over(self, values: impl Iterator<Item = f64> + Clone) -> Self::Out;
}

impl Source<'_> {
    fn over<O: OverValues>(&self, rows: &[usize], o: O) -> O::Out {
        match self {
            Source::Numeric(x) => o.over(rows.iter().map(|&i| x[i])),
            Source::Level(codes, lv) => o.over(rows.iter().map(|&i| if codes[i] == *lv { 1.0 } else { 0.0 })),
            Source::Term(t, src) => o.over(rows.iter().map(|&i| t.value(src, i))),
        }
    }

    fn value(&self, i: usize) -> f64 {
        match self {
            Source::Numeric(x) => x[i],
            Source::Level(codes, lv) => {
                if codes[i] == *lv {
                    1.0
                } else {
                    0.0
                }
            }
            Source::Term(t, src) => t.value(src, i),
        }
    }
}

struct FirstNonFinite;

impl OverValues for FirstNonFinite {
    type Out = Option<usize>;
    fn over(self, mut values: impl Iterator<Item = f64> + Clone) -> Option<usize> {
        values.position(|v| !v.is_finite())
    }
}

/// Mean and variance (n - 1 divisor), each a sum in row order.
struct MeanVariance;

impl OverValues for MeanVariance {
    type Out = (f64, f64);
    fn over(self, values: impl Iterator<Item = f64> + Clone) -> (f64, f64) {
        let n = values.clone().count() as f64;
        let m = values.clone().sum::<f64>() / n;
        let v = values.map(|x| (x - m) * (x - m)).sum::<f64>() / (n - 1.0);
        (m, v)
    }
}

/// Standardised values into one column of a row-major block.
struct Fill<'a> {
    block: &'a mut [f64],
    width: usize,
    column: usize,
    mean: f64,
    sd: f64,
}

impl OverValues for Fill<'_> {
    type Out = ();
    fn over(self, values: impl Iterator<Item = f64> + Clone) {
        for (row, v) in self.block.chunks_mut(self.width).zip(values) {
            row[self.column] = (v - self.mean) / self.sd;
        }
    }
}

/// The specification of the propensity design.
#[derive(Debug, Clone, Default, Serialize, Deserialize)]
pub struct DesignSpec {
    /// Covariates (numeric or categorical), by name.
    pub covariates: Vec<String>,
    /// Derived terms.
    pub terms: Vec<Term>,
}

/// A standardised design matrix, row-major, with an intercept in column 0.
#[derive(Debug, Clone)]
pub struct Design {
    /// Column names (without the intercept).
    pub names: Vec<String>,
    /// Column kinds (without the intercept).
    pub kinds: Vec<ColumnKind>,
    /// Mean of each column over the units used (for transforming coefficients back).
    pub mean: Vec<f64>,
    /// Standard deviation (n - 1 divisor) of each column over the units used.
    pub sd: Vec<f64>,
    /// Number of units.
    pub n: usize,
    /// `n * (1 + names.len())` standardised values, row-major, column 0 = 1.
    pub z: Vec<f64>,
}

impl Design {
    /// Columns including the intercept.
    pub fn width(&self) -> usize {
        self.names.len() + 1
    }

    /// Row `i` (intercept first).
    pub fn row(&self, i: usize) -> &[f64] {
        let k = self.width();
        &self.z[i * k..(i + 1) * k]
    }

    /// Standardised value of column `j` (0-based, intercept excluded) at unit `i`.
    pub fn at(&self, i: usize, j: usize) -> f64 {
        self.z[i * self.width() + j + 1]
    }

    /// Build the design for the units `rows` of `units`.
    ///
    /// # Errors
    /// Unknown covariate, categorical covariate inside a term, non-finite value, constant column,
    /// collinear columns.
    pub fn build(units: &UnitTable, spec: &DesignSpec, rows: &[usize]) -> MatchResult<Design> {
        let available = || {
            units
                .numeric
                .iter()
                .map(|(n, _)| n.clone())
                .chain(units.categorical.iter().map(|c| c.name.clone()))
                .collect::<Vec<_>>()
        };
        let mut names = Vec::new();
        let mut kinds = Vec::new();
        // where each design column's values come from (read from the unit table's columns
        // as needed, never copied whole)
        let mut cols: Vec<Source> = Vec::new();
        for c in &spec.covariates {
            if let Some(x) = units.numeric(c) {
                names.push(c.clone());
                kinds.push(ColumnKind::Numeric);
                cols.push(Source::Numeric(x));
            } else if let Some(cat) = units.categorical.iter().find(|k| &k.name == c) {
                // one column per level: a covariate with about as many levels as units cannot
                // be estimated and would make the propensity fit quadratically slow
                let limit = (rows.len() / 10).clamp(2, 200);
                if cat.levels.len() > limit {
                    return Err(MatchError::BadParameter {
                        name: "--categorical",
                        value: c.clone(),
                        detail: format!(
                            "{} levels for {} units; a categorical covariate may have at most {limit} here (group rare levels, or leave it out)",
                            cat.levels.len(),
                            rows.len()
                        ),
                    });
                }
                for (lv, level) in cat.levels.iter().enumerate().skip(1) {
                    names.push(format!("{c}={level}"));
                    kinds.push(ColumnKind::Level);
                    cols.push(Source::Level(&cat.codes, lv));
                }
            } else {
                return Err(MatchError::UnknownColumn { what: "covariate", name: c.clone(), available: available() });
            }
        }
        for t in &spec.terms {
            let mut src: Vec<&[f64]> = Vec::new();
            for nm in t.names() {
                match units.numeric(nm) {
                    Some(x) => src.push(x),
                    None if units.categorical.iter().any(|k| k.name == nm) => {
                        return Err(MatchError::CategoricalInTerm { name: nm.to_string() });
                    }
                    None => {
                        return Err(MatchError::UnknownColumn {
                            what: "term covariate",
                            name: nm.to_string(),
                            available: available(),
                        });
                    }
                }
            }
            let label = t.label();
            if names.contains(&label) {
                continue;
            }
            names.push(label);
            kinds.push(ColumnKind::Term);
            cols.push(Source::Term(t, src));
        }
        let n = rows.len();
        if n < 2 {
            return Err(MatchError::TooFew { what: "units in the propensity model".into(), found: n, needed: 2 });
        }
        let p = names.len();
        let mut mean = vec![0.0; p];
        let mut sd = vec![0.0; p];
        // columns in parallel, each checked and summed in row order
        let moments: Vec<MatchResult<(f64, f64)>> = (0..p)
            .into_par_iter()
            .map(|j| {
                let c = &cols[j];
                if let Some(r) = c.over(rows, FirstNonFinite) {
                    let i = rows[r];
                    return Err(MatchError::NonFinite {
                        name: names[j].clone(),
                        unit: units.id(i).into_owned(),
                        line: units.lines[i],
                        value: c.value(i),
                    });
                }
                let (m, v) = c.over(rows, MeanVariance);
                let s = v.sqrt();
                if s.is_nan() || s <= 1e-12 * m.abs().max(1.0) {
                    return Err(MatchError::ConstantColumn {
                        name: names[j].clone(),
                        value: c.value(rows[0]),
                        units: n,
                    });
                }
                Ok((m, s))
            })
            .collect();
        for (j, ms) in moments.into_iter().enumerate() {
            (mean[j], sd[j]) = ms?;
        }
        let k = p + 1;
        let mut z = vec![0.0; n * k];
        z.par_chunks_mut(k * ROWS_PER_TASK).enumerate().for_each(|(b, block)| {
            let at = &rows[b * ROWS_PER_TASK..(b * ROWS_PER_TASK + block.len() / k)];
            for row in block.chunks_mut(k) {
                row[0] = 1.0;
            }
            for j in 0..p {
                cols[j].over(at, Fill { block: &mut *block, width: k, column: j + 1, mean: mean[j], sd: sd[j] });
            }
        });
        let design = Design { names, kinds, mean, sd, n, z };
        design.check_collinear()?;
        Ok(design)
    }

    /// Cholesky of the correlation matrix, column by column: the first column whose pivot
    /// vanishes is (numerically) a combination of the earlier ones.
    fn check_collinear(&self) -> MatchResult<()> {
        let p = self.names.len();
        let k = self.width();
        // cross products over fixed blocks of rows, added in block order (any thread count)
        let parts: Vec<Vec<f64>> = self
            .z
            .par_chunks(k * ROWS_PER_TASK)
            .map(|block| {
                let mut c = vec![0.0; p * p];
                for r in block.chunks(k) {
                    let row = &r[1..];
                    for a in 0..p {
                        let va = row[a];
                        for b in 0..=a {
                            c[a * p + b] += va * row[b];
                        }
                    }
                }
                c
            })
            .collect();
        let mut c = vec![0.0; p * p];
        for part in parts {
            for (x, y) in c.iter_mut().zip(part) {
                *x += y;
            }
        }
        let denom = self.n as f64 - 1.0;
        for v in &mut c {
            *v /= denom;
        }
        let mut l = vec![0.0; p * p];
        for j in 0..p {
            let mut d = c[j * p + j];
            for m in 0..j {
                d -= l[j * p + m] * l[j * p + m];
            }
            if d < 1e-10 {
                return Err(MatchError::Collinear { name: self.names[j].clone(), earlier: self.names[..j].join(", ") });
            }
            let d = d.sqrt();
            l[j * p + j] = d;
            for i in j + 1..p {
                let mut s = c[i * p + j];
                for m in 0..j {
                    s -= l[i * p + m] * l[j * p + m];
                }
                l[i * p + j] = s / d;
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn terms_parse_and_print() {
        let t: Term = "age^3".parse().unwrap();
        assert_eq!(t.label(), "age^3");
        let t: Term = " educ : re74 ".parse().unwrap();
        assert_eq!(t.label(), "educ:re74");
        let t: Term = "zero(re75)".parse().unwrap();
        assert_eq!(t.label(), "zero(re75)");
        assert!("age^9".parse::<Term>().is_err());
        assert!("age^x".parse::<Term>().is_err());
        assert!("age".parse::<Term>().is_err());
        assert!("zero(age".parse::<Term>().is_err());
        assert!("a::b".parse::<Term>().is_err());
        assert!("log(a)".parse::<Term>().is_err());
        let t: Term = "log1p(spend)".parse().unwrap();
        assert_eq!(t.label(), "log1p(spend)");
        assert!((t.value(&[&[std::f64::consts::E - 1.0]], 0) - 1.0).abs() < 1e-15);
    }

    #[test]
    fn term_values() {
        let a = [2.0, 0.0];
        let b = [3.0, 5.0];
        let t: Term = "a^2:b".parse().unwrap();
        assert_eq!(t.value(&[&a, &b], 0), 12.0);
        let z: Term = "zero(a)".parse().unwrap();
        assert_eq!(z.value(&[&a], 0), 0.0);
        assert_eq!(z.value(&[&a], 1), 1.0);
    }
}
