"""The forecast benchmark job, aftercast and statsmodels side by side in one run.

Job (docs/performance.md, "forecast"): benches/data/bench_series.csv, 1,095 daily pre-period
values; local linear trend + dummy seasonal 7 + trigonometric seasonal 365.25 with 4 harmonics +
two regressors as states; exact diffuse initialisation; MLE, then 1,000 simulated 90-day paths.
aftercast draws its paths WITH parameter uncertainty (100 parameter draws, one filter pass each);
statsmodels' `simulate` has none (its paths use the MLE only), so it does strictly less work.

Run (after `cargo build --release -p aftercast-forecast --example structural_job`):
    python3 -m venv /tmp/venv && /tmp/venv/bin/pip install numpy pandas statsmodels
    /tmp/venv/bin/python crates/aftercast-forecast/benches/side_by_side.py [--reps 3] [--bin PATH]
PATH defaults to $CARGO_TARGET_DIR/release/examples/structural_job (or target/release/...).
"""
import argparse, json, os, subprocess, time

import numpy as np, pandas as pd, statsmodels, statsmodels.api as sm

HERE = os.path.dirname(os.path.abspath(__file__))
ap = argparse.ArgumentParser()
ap.add_argument('--reps', type=int, default=3)
ap.add_argument('--bin', default=os.path.join(os.environ.get('CARGO_TARGET_DIR', os.path.join(HERE, '..', '..', '..', 'target')),
                                              'release', 'examples', 'structural_job'))
args = ap.parse_args()

ours = json.loads(subprocess.run([args.bin, '--reps', str(args.reps)], check=True, capture_output=True, text=True).stdout)

df = pd.read_csv(os.path.join(HERE, 'data', 'bench_series.csv'))
n_pre, n_post = 1095, 90
y = df['y'].to_numpy()
exog = df[['c1', 'c2']].to_numpy()
import warnings
warnings.simplefilter('ignore')


def statsmodels_job(exact):
    times = []
    for _ in range(args.reps):
        t0 = time.perf_counter()
        mod = sm.tsa.UnobservedComponents(y[:n_pre], 'lltrend', seasonal=7,
                                          freq_seasonal=[{'period': 365.25, 'harmonics': 4}],
                                          exog=exog[:n_pre], mle_regression=False, use_exact_diffuse=exact)
        res = mod.fit(disp=0, method='lbfgs', maxiter=500)
        res.simulate(n_post, repetitions=1000, anchor='end', exog=exog[n_pre:n_pre + n_post])
        times.append(time.perf_counter() - t0)
    return min(times), times, res


print(f"aftercast  : {ours['best_s']:.3f} s best of {args.reps} (all {', '.join(f'{x:.3f}' for x in ours['all_s'])}; fit alone {ours['best_fit_s']:.3f} s); "
      f"loglik {ours['loglik']:.3f}, {ours['iterations']} L-BFGS iterations, {ours['threads']} threads, exact diffuse, paths with parameter uncertainty")
for exact, label in [(True, 'exact diffuse'), (False, 'approximate diffuse (its default)')]:
    best, times, res = statsmodels_job(exact)
    iters = res.mle_retvals.get('iterations') if res.mle_retvals else None
    print(f"statsmodels {statsmodels.__version__}, {label}: {best:.3f} s best of {args.reps} (all {', '.join(f'{x:.3f}' for x in times)}); "
          f"llf {res.llf:.3f}, {iters} iterations, nobs_diffuse {res.nobs_diffuse}, paths without parameter uncertainty; "
          f"ratio statsmodels / aftercast {best / ours['best_s']:.1f}x")
