"""Benchmark data for aftercast-forecast and the same job timed with statsmodels.

Writes benches/data/bench_series.csv (1,185 daily values: 1,095 pre + 90 post; weekly pattern,
yearly cycle, two control series), then times statsmodels UnobservedComponents on the same
model as the Rust benchmark: local linear trend, dummy seasonal 7, trigonometric seasonal
365.25 with 4 harmonics, two regressors as states (mle_regression=False), exact diffuse
initialisation; MLE (L-BFGS) + 1,000 simulated 90-day paths.
Run:  /tmp/venv/bin/python crates/aftercast-forecast/benches/bench_statsmodels.py
Written against statsmodels 0.15.0 (version printed at the end).
"""
import os, time
import numpy as np, pandas as pd, statsmodels, statsmodels.api as sm

HERE = os.path.dirname(os.path.abspath(__file__))
rng = np.random.default_rng(7)
n_pre, n_post = 1095, 90
n = n_pre + n_post
t = np.arange(n)
c1 = 50 + np.cumsum(rng.normal(0, 0.5, n))
c2 = 20 + 3 * np.sin(2 * np.pi * t / 30.0) + rng.normal(0, 1, n)
level = 500 + np.cumsum(rng.normal(0.05, 1.0, n))
weekly = np.array([0, 5, 8, 6, 4, -10, -13])[t % 7]
yearly = 25 * np.sin(2 * np.pi * t / 365.25) + 8 * np.cos(4 * np.pi * t / 365.25)
y = level + weekly + yearly + 2.0 * c1 + 1.5 * c2 + rng.normal(0, 4, n)
dates = pd.date_range('2021-01-01', periods=n, freq='D')
pd.DataFrame({'date': dates.strftime('%Y-%m-%d'), 'y': y, 'c1': c1, 'c2': c2}).to_csv(
    os.path.join(HERE, 'data', 'bench_series.csv'), index=False, float_format='%.10g')

exog = np.column_stack([c1, c2])
reps = 3
times = []
for _ in range(reps):
    t0 = time.perf_counter()
    mod = sm.tsa.UnobservedComponents(y[:n_pre], 'lltrend', seasonal=7,
                                      freq_seasonal=[{'period': 365.25, 'harmonics': 4}],
                                      exog=exog[:n_pre], mle_regression=False, use_exact_diffuse=True)
    res = mod.fit(disp=0, method='lbfgs', maxiter=500)
    sims = res.simulate(n_post, repetitions=1000, anchor='end', exog=exog[n_pre:])
    times.append(time.perf_counter() - t0)
print(f'statsmodels {statsmodels.__version__}: MLE + 1000 paths, best of {reps}: {min(times):.3f} s '
      f'(all: {", ".join(f"{x:.3f}" for x in times)}); llf {res.llf:.3f}; params {np.round(res.params, 4).tolist()}')
