//! Writes the benchmark unit table of docs/performance.md ("data layer"): one row per unit,
//! 13 numeric columns (`id, treated, y, x1..x10`), the design of the matching benchmark
//! (10 standard-normal covariates, treatment logistic in them with about 10% treated,
//! outcome = sum of covariates + 1 x treated + noise), numbers written with 5 decimals.
//!
//! Run: cargo run --release -p aftercast-core --example make_units -- ROWS FILE
//! (1,000,000 rows make a file of about 100 MB; 10,000,000 about 1 GB).

use std::io::Write;

/// SplitMix64: a small, well-known generator (Steele, Lea & Flood 2014); enough for test data.
struct SplitMix(u64);

impl SplitMix {
    fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    fn uniform(&mut self) -> f64 {
        ((self.next() >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }

    /// Box-Muller.
    fn normal(&mut self) -> f64 {
        let (u, v) = (self.uniform(), self.uniform());
        (-2.0 * u.ln()).sqrt() * (2.0 * std::f64::consts::PI * v).cos()
    }
}

fn main() -> std::io::Result<()> {
    let args: Vec<String> = std::env::args().collect();
    let (Some(rows), Some(path)) = (args.get(1).and_then(|a| a.parse::<usize>().ok()), args.get(2)) else {
        eprintln!("usage: make_units ROWS FILE");
        std::process::exit(2);
    };
    let b = [0.4, -0.3, 0.2, 0.25, -0.15, 0.1, 0.3, -0.2, 0.05, 0.15];
    let mut g = SplitMix(42);
    let mut out = std::io::BufWriter::with_capacity(1 << 20, std::fs::File::create(path)?);
    write!(out, "id,treated,y")?;
    for j in 1..=10 {
        write!(out, ",x{j}")?;
    }
    writeln!(out)?;
    let mut x = [0.0; 10];
    for i in 0..rows {
        for v in &mut x {
            *v = g.normal();
        }
        let eta = -2.45 + x.iter().zip(&b).map(|(a, c)| a * c).sum::<f64>();
        let t = g.uniform() < 1.0 / (1.0 + (-eta).exp());
        let y = x.iter().sum::<f64>() + if t { 1.0 } else { 0.0 } + g.normal();
        write!(out, "{},{},{:.5}", i + 1, u8::from(t), y)?;
        for v in &x {
            write!(out, ",{v:.5}")?;
        }
        writeln!(out)?;
    }
    out.flush()
}
