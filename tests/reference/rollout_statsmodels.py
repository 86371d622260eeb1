"""Reference values for staggered-rollout estimators, computed with statsmodels.

Produces (next to this script):
  rollout_panel.csv        -- deterministic staggered-adoption panel, columns
                              unit,period,y,start (start empty = never adopted)
  rollout_statsmodels.json -- statsmodels OLS reference numbers:
      versions            {python, numpy, pandas, statsmodels}
      twfe_static         {coef, se, se_cluster}: D in y ~ C(unit) + C(period) + D
      event_study         [{k, coef}]: relative-time dummies (all k except -1)
      imputation          {treated [{unit, period, y0_hat, tau}], att,
                           by_event_time [{k, mean_tau, n}],
                           untreated_fitted_first5 [{unit, period, fitted}]}
      true_att            mean generated treatment effect over treated rows

Data generation (numpy default_rng(20261202), draws in this order):
  a_i   = rng.normal(50, 10, 30)          unit effects, units r01..r30
  b_t   = rng.normal(0, 3, 20)            period effects, periods 1..20
  e_it  = rng.normal(0, 1, (30, 20))      noise, unit-major
  start = 8 (r01-r08), 12 (r09-r15), 15 (r16-r21), never (r22-r30)
  effect at t >= start: (1.0 + 0.5*(t - start)) * (1 + 0.5*wave), wave = 0,1,2
  y = round(a_i + b_t + effect + e_it, 6)

All fits use the CSV as written (read back with pandas), in float64.
Cluster-robust SE: statsmodels cov_type="cluster" by unit, with its default
small-sample correction (G/(G-1) * (N-1)/(N-K)).

Run: /tmp/venv/bin/python tests/reference/rollout_statsmodels.py
"""

import json
import os
import platform

import numpy as np
import pandas as pd
import statsmodels
import statsmodels.formula.api as smf

HERE = os.path.dirname(os.path.abspath(__file__))
CSV_PATH = os.path.join(HERE, "rollout_panel.csv")
JSON_PATH = os.path.join(HERE, "rollout_statsmodels.json")

SEED = 20261202
N_UNITS = 30
PERIODS = list(range(1, 21))
WAVES = [(8, 0), (12, 1), (15, 2)]  # (start, wave_index)


def unit_name(i):
    return "r%02d" % (i + 1)


def unit_start(i):
    n = i + 1
    if n <= 8:
        return 8
    if n <= 15:
        return 12
    if n <= 21:
        return 15
    return None


def true_effect(t, start):
    if start is None or t < start:
        return 0.0
    wave = dict(WAVES)[start]
    return (1.0 + 0.5 * (t - start)) * (1.0 + 0.5 * wave)


def generate():
    rng = np.random.default_rng(SEED)
    a = rng.normal(50.0, 10.0, N_UNITS)
    b = rng.normal(0.0, 3.0, len(PERIODS))
    e = rng.normal(0.0, 1.0, (N_UNITS, len(PERIODS)))
    rows = []
    for i in range(N_UNITS):
        s = unit_start(i)
        for j, t in enumerate(PERIODS):
            y = a[i] + b[j] + true_effect(t, s) + e[i, j]
            rows.append((unit_name(i), t, round(float(y), 6), s))
    df = pd.DataFrame(rows, columns=["unit", "period", "y", "start"])
    df["start"] = df["start"].astype("Int64")  # None -> empty field in CSV
    df.to_csv(CSV_PATH, index=False)


def ev_name(k):
    return "ev_m%d" % (-k) if k < 0 else "ev_p%d" % k


def main():
    generate()
    df = pd.read_csv(CSV_PATH, dtype={"unit": str, "period": np.int64, "y": np.float64})
    df["start"] = df["start"].astype(np.float64)  # NaN = never adopted
    adopted = df["start"].notna()
    df["D"] = (adopted & (df["period"] >= df["start"])).astype(np.float64)
    rel = (df["period"] - df["start"])  # NaN for never adopted

    versions = {
        "python": platform.python_version(),
        "numpy": np.__version__,
        "pandas": pd.__version__,
        "statsmodels": statsmodels.__version__,
    }

    # --- static TWFE ---
    f_static = "y ~ C(unit) + C(period) + D"
    m_static = smf.ols(f_static, data=df).fit()
    m_static_cl = smf.ols(f_static, data=df).fit(
        cov_type="cluster", cov_kwds={"groups": pd.factorize(df["unit"])[0]}
    )
    twfe_static = {
        "coef": float(m_static.params["D"]),
        "se": float(m_static.bse["D"]),
        "se_cluster": float(m_static_cl.bse["D"]),
    }

    # --- event study (all relative times among adopted units except -1) ---
    ks = sorted(int(k) for k in rel[adopted].unique() if int(k) != -1)
    es = df.copy()
    for k in ks:
        es[ev_name(k)] = (adopted & (rel == k)).astype(np.float64)
    f_es = "y ~ C(unit) + C(period) + " + " + ".join(ev_name(k) for k in ks)
    m_es = smf.ols(f_es, data=es).fit()
    event_study = [{"k": k, "coef": float(m_es.params[ev_name(k)])} for k in ks]

    # --- imputation (fit on untreated, predict treated) ---
    untreated = df[df["D"] == 0.0]
    treated = df[df["D"] == 1.0].copy()
    m_imp = smf.ols("y ~ C(unit) + C(period)", data=untreated).fit()
    treated["y0_hat"] = np.asarray(m_imp.predict(treated), dtype=np.float64)
    treated["tau"] = treated["y"] - treated["y0_hat"]
    treated["k"] = (treated["period"] - treated["start"]).astype(np.int64)
    treated = treated.sort_values(["unit", "period"], kind="mergesort")
    by_k = []
    for k, g in treated.groupby("k", sort=True):
        by_k.append({"k": int(k), "mean_tau": float(g["tau"].mean()), "n": int(len(g))})
    fitted_u = np.asarray(m_imp.fittedvalues, dtype=np.float64)
    first5 = [
        {"unit": str(u), "period": int(p), "fitted": float(f)}
        for u, p, f in zip(untreated["unit"].iloc[:5], untreated["period"].iloc[:5], fitted_u[:5])
    ]
    imputation = {
        "treated": [
            {"unit": str(r.unit), "period": int(r.period), "y0_hat": float(r.y0_hat), "tau": float(r.tau)}
            for r in treated.itertuples(index=False)
        ],
        "att": float(treated["tau"].mean()),
        "by_event_time": by_k,
        "untreated_fitted_first5": first5,
    }

    true_att = float(np.mean([
        true_effect(int(r.period), int(r.start)) for r in treated.itertuples(index=False)
    ]))

    out = {
        "versions": versions,
        "twfe_static": twfe_static,
        "event_study": event_study,
        "imputation": imputation,
        "true_att": true_att,
    }
    with open(JSON_PATH, "w") as fh:
        json.dump(out, fh, indent=1)
        fh.write("\n")

    print("twfe_static coef:", twfe_static["coef"])
    print("imputation att:  ", imputation["att"])
    print("true_att:        ", true_att)


if __name__ == "__main__":
    main()
