//! Benchmark of issue 4: 400 donors x 200 pre-periods + 20 post-periods, method `weights` with
//! the full placebo in space (401 fits) in parallel, and `sdid` on the same panel.
//! Numbers are recorded in docs/performance.md (section "synthetic").
#![allow(missing_docs)]

use aftercast_core::panel::Panel;
use aftercast_core::table::RawTable;
use aftercast_core::time::TimePoint;
use aftercast_synth::{Method, SynthParams};
use criterion::{Criterion, criterion_group, criterion_main};

/// Same factor model as tests/common (SplitMix64 + Box-Muller), 401 units x 220 periods.
pub fn bench_panel() -> Panel {
    let mut state = 20_260_101_u64;
    let mut next = move || {
        state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = state;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        ((z ^ (z >> 31)) >> 11) as f64 / (1u64 << 53) as f64
    };
    let mut normal = move || {
        let u1 = next().max(1e-300);
        let u2 = next();
        (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
    };
    let (units, periods) = (401, 220);
    let f1: Vec<f64> = (0..periods).map(|t| (t as f64 / 4.0).sin() * 3.0 + normal()).collect();
    let mut f2 = vec![0.0; periods];
    for t in 1..periods {
        f2[t] = 0.8 * f2[t - 1] + normal();
    }
    let mut csv = String::with_capacity(units * periods * 24);
    csv.push_str("unit,period,y\n");
    for i in 0..units {
        let (a, l1, l2) = (20.0 + 2.0 * normal(), 1.0 + 0.5 * normal(), 1.0 + 0.5 * normal());
        for t in 0..periods {
            let y = a + l1 * f1[t] + l2 * f2[t] + normal();
            csv.push_str(&format!("u{i:03},{t},{y}\n"));
        }
    }
    let table = RawTable::from_csv_bytes(std::path::Path::new("bench.csv"), csv.as_bytes()).unwrap();
    let spec = aftercast_core::panel::LongPanelSpec {
        unit: "unit".into(),
        time: "period".into(),
        outcome: "y".into(),
        ..Default::default()
    };
    let panel = Panel::from_long(&table, &spec).unwrap();
    // The same value is printed by scipy_placebo_timing.py: both time the same panel.
    assert!((panel.outcome[400][199] - 18.339334907751482).abs() < 1e-12, "{}", panel.outcome[400][199]);
    panel
}

fn bench(c: &mut Criterion) {
    let panel = bench_panel();
    let treated = vec!["u400".to_string()];
    let mut g = c.benchmark_group("synthetic_400x220");
    g.sample_size(10);
    let weights = SynthParams::new().check().unwrap();
    g.bench_function("weights_with_placebo_401_fits", |b| {
        b.iter(|| weights.fit(&panel, &treated, TimePoint::Period(200)).unwrap())
    });
    let single = SynthParams::new().placebo(false).check().unwrap();
    g.bench_function("weights_single_fit", |b| {
        b.iter(|| single.fit(&panel, &treated, TimePoint::Period(200)).unwrap())
    });
    let sdid = SynthParams::new().method(Method::Sdid).check().unwrap();
    g.bench_function("sdid_with_200_placebo_reps", |b| {
        b.iter(|| sdid.fit(&panel, &treated, TimePoint::Period(200)).unwrap())
    });
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
