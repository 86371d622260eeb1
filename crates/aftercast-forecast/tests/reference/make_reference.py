"""Reference values for aftercast-forecast tests, computed with statsmodels.

Run:  python3 -m venv /tmp/venv && /tmp/venv/bin/pip install statsmodels==0.15.0 numpy pandas
      /tmp/venv/bin/python crates/aftercast-forecast/tests/reference/make_reference.py
Written with statsmodels 0.15.0, numpy and pandas as recorded in the JSON files.
Outputs (in ../data): uc_series.csv, uc_reference.json, hw_series.csv, hw_reference.json.
`cargo test` never runs this script; it reads the committed outputs.
"""
import json, os
import numpy as np, pandas as pd, statsmodels, statsmodels.api as sm
from statsmodels.stats.diagnostic import acorr_ljungbox
from statsmodels.tsa.holtwinters import ExponentialSmoothing
from statsmodels.tsa.exponential_smoothing.ets import ETSModel

HERE = os.path.dirname(os.path.abspath(__file__))
DATA = os.path.join(HERE, '..', 'data')
rng = np.random.default_rng(20261201)
versions = {'statsmodels': statsmodels.__version__, 'numpy': np.__version__, 'pandas': pd.__version__}

# ---- series A: local linear trend + dummy seasonal(7) + regressor ---------------------------
n = 400
x = np.cumsum(rng.normal(0, 0.3, n)) + rng.normal(0, 1.0, n)
lvl, slope = 10.0, 0.05
season = list(rng.normal(0, 2, 6))
y = np.empty(n)
for t in range(n):
    s_t = season[0]
    y[t] = lvl + s_t + 1.5 * x[t] + rng.normal(0, 2.0)        # irregular var 4
    lvl = lvl + slope + rng.normal(0, np.sqrt(0.5))             # level var 0.5
    slope = slope + rng.normal(0, np.sqrt(0.01))                # slope var 0.01
    new = -sum(season) + rng.normal(0, np.sqrt(0.2))            # seasonal var 0.2
    season = [new] + season[:-1]
y[[50, 51, 200]] = np.nan

# ---- series B: local level + trigonometric seasonal(12, K=2) --------------------------------
y2 = np.empty(n)
lvl = 5.0
g = rng.normal(0, 1, 4)
lam = [2 * np.pi / 12, 4 * np.pi / 12]
for t in range(n):
    y2[t] = lvl + g[0] + g[2] + rng.normal(0, 1.0)
    lvl = lvl + rng.normal(0, np.sqrt(0.1))
    ng = np.empty(4)
    for j in range(2):
        c, s = np.cos(lam[j]), np.sin(lam[j])
        ng[2*j] = c * g[2*j] + s * g[2*j+1] + rng.normal(0, np.sqrt(0.01))
        ng[2*j+1] = -s * g[2*j] + c * g[2*j+1] + rng.normal(0, np.sqrt(0.01))
    g = ng

pd.DataFrame({'t': np.arange(n), 'y': y, 'x': x, 'y2': y2}).to_csv(
    os.path.join(DATA, 'uc_series.csv'), index=False, float_format='%.17g', na_rep='NaN')

out = {'versions': versions}
mod_a = sm.tsa.UnobservedComponents(y, 'lltrend', seasonal=7, exog=x, mle_regression=False,
                                    use_exact_diffuse=True)
pa = [3.5, 0.6, 0.02, 0.15]
ra = mod_a.smooth(pa)
fa = mod_a.fit(method='lbfgs', maxiter=2000, disp=0, pgtol=1e-10, factr=10.0)
out['a'] = {
    'model': "UnobservedComponents(y, 'lltrend', seasonal=7, exog=x, mle_regression=False, use_exact_diffuse=True)",
    'param_names': list(mod_a.param_names), 'params': pa, 'llf': ra.llf,
    'llf_obs_first': list(ra.llf_obs[:12]), 'nobs_diffuse': int(ra.nobs_diffuse),
    'filtered_state': ra.filtered_state.T.tolist(), 'forecasts': ra.forecasts[0].tolist(),
    'mle_params': fa.params.tolist(), 'mle_llf': fa.llf,
    'mle_converged': bool(fa.mle_retvals.get('converged', True)),
}
mod_b = sm.tsa.UnobservedComponents(y2, 'llevel', freq_seasonal=[{'period': 12, 'harmonics': 2}],
                                    use_exact_diffuse=True)
pb = [0.9, 0.12, 0.015]
rb = mod_b.smooth(pb)
fb = mod_b.fit(method='lbfgs', maxiter=2000, disp=0, pgtol=1e-10, factr=10.0)
out['b'] = {
    'model': "UnobservedComponents(y2, 'llevel', freq_seasonal=[{'period': 12, 'harmonics': 2}], use_exact_diffuse=True)",
    'param_names': list(mod_b.param_names), 'params': pb, 'llf': rb.llf,
    'nobs_diffuse': int(rb.nobs_diffuse),
    'filtered_state': rb.filtered_state.T.tolist(), 'forecasts': rb.forecasts[0].tolist(),
    'mle_params': fb.params.tolist(), 'mle_llf': fb.llf,
}
# Nile, exact diffuse, both parameter points of Durbin & Koopman / Fulton
nile = pd.read_csv(os.path.join(DATA, 'nile.csv'))['volume'].values.astype(float)
mn = sm.tsa.UnobservedComponents(nile, 'llevel', use_exact_diffuse=True)
ma = sm.tsa.UnobservedComponents(nile, 'llevel')
out['nile'] = {}
for p in [(15099.0, 1469.1), (10000.0, 1.0)]:
    r = mn.smooth(list(p)); r2 = ma.smooth(list(p))
    out['nile'][f'{p[0]:g},{p[1]:g}'] = {'exact_llf': r.llf, 'exact_llf_without_diffuse': float(r.llf_obs[1:].sum()),
                                         'approx_llf_burn1': r2.llf}
# Ljung-Box on a stored vector
e = rng.normal(0, 1, 150)
e[1:] += 0.4 * e[:-1]
lb = acorr_ljungbox(e, lags=[5, 10], return_df=True)
out['ljung_box'] = {'x': e.tolist(), 'lags': [5, 10], 'stat': lb['lb_stat'].tolist(), 'pvalue': lb['lb_pvalue'].tolist()}
# the 18-state benchmark model (benches/data/bench_series.csv, first 1,095 days) with the
# approximate diffuse prior (statsmodels' default, kappa 1e6, loglikelihood_burn = 18)
bd = pd.read_csv(os.path.join(HERE, '..', '..', 'benches', 'data', 'bench_series.csv'))[:1095]
mb = sm.tsa.UnobservedComponents(bd['y'].values, 'lltrend', seasonal=7,
                                 freq_seasonal=[{'period': 365.25, 'harmonics': 4}],
                                 exog=bd[['c1', 'c2']].values, mle_regression=False)
bp = [[16.0, 1.0, 0.001, 1e-6, 1e-6], [15.9, 0.5, 0.05, 0.001, 0.16]]
out['bench_approx'] = {'params': bp, 'llf': [mb.smooth(p).llf for p in bp], 'burn': int(mb.loglikelihood_burn)}
with open(os.path.join(DATA, 'uc_reference.json'), 'w') as f:
    json.dump(out, f)

# ---- Holt-Winters -----------------------------------------------------------------------------
m = 84
tt = np.arange(m)
hw = 100 + 0.8 * tt + 10 * np.sin(2 * np.pi * tt / 12) + 4 * np.cos(4 * np.pi * tt / 12) + rng.normal(0, 2, m)
pd.DataFrame({'t': tt, 'y': hw}).to_csv(os.path.join(DATA, 'hw_series.csv'), index=False, float_format='%.17g')
init_level = 100.0
init_trend = 0.7
init_add = [10 * np.sin(2 * np.pi * k / 12) for k in range(12)]
init_add = list(np.array(init_add) - np.mean(init_add))
init_mul = list(1 + np.array(init_add) / 100.0)
hwout = {'versions': versions, 'cases': []}
for name, seasonal, damped, init_s in [('add-damped', 'add', True, init_add), ('mul', 'mul', False, init_mul),
                                        ('mul-damped', 'mul', True, init_mul), ('add', 'add', False, init_add)]:
    mod = ExponentialSmoothing(hw, trend='add', damped_trend=damped, seasonal=seasonal, seasonal_periods=12,
                               initialization_method='known', initial_level=init_level,
                               initial_trend=init_trend, initial_seasonal=init_s)
    kw = dict(smoothing_level=0.3, smoothing_trend=0.1, smoothing_seasonal=0.2, optimized=False)
    if damped:
        kw['damping_trend'] = 0.95
    r = mod.fit(**kw)
    # ExponentialSmoothing 0.15.0 forecasts at horizons h = m, 2m, ... use the seasonal state of
    # one season earlier (its _predict overwrites s[nobs+m-1] with s[nobs-1]); ETSModel with
    # additive error is the same recursion for additive seasonality (beta_ets = alpha * beta)
    # and forecasts every horizon from the latest seasonal state, so it is stored as well.
    ets_fc = None
    if seasonal == 'add':
        em = ETSModel(hw, error='add', trend='add', damped_trend=damped, seasonal='add', seasonal_periods=12,
                      initialization_method='known', initial_level=init_level, initial_trend=init_trend,
                      initial_seasonal=init_s)
        ep = [0.3, 0.3 * 0.1, 0.2] + ([0.95] if damped else [])
        ets_fc = em.smooth(ep).forecast(24).tolist()
    hwout['cases'].append({'name': name, 'seasonal': seasonal, 'damped': damped, 'alpha': 0.3, 'beta': 0.1,
                           'gamma': 0.2, 'phi': 0.95 if damped else 1.0, 'initial_level': init_level,
                           'initial_trend': init_trend, 'initial_seasonal': list(init_s),
                           'fitted': r.fittedvalues.tolist(), 'forecast': r.forecast(24).tolist(),
                           'sse': float(r.sse), 'ets_forecast': ets_fc})
with open(os.path.join(DATA, 'hw_reference.json'), 'w') as f:
    json.dump(hwout, f)
print('ok', versions, out['a']['mle_params'], out['a']['mle_llf'], out['b']['mle_params'])
