"""Reference values for the simplex-constrained least-squares weights on the Grunfeld panel.

Data: statsmodels.datasets.grunfeld (Grunfeld 1958; 11 US firms, 1935-1954), exported to
../data/grunfeld.csv by this script. For every firm in turn as the treated unit and the other
10 firms as donors, the weights minimise the mean squared pre-period gap of `invest` over
1935-1949 (15 pre-periods) subject to w >= 0, sum w = 1, solved with scipy.optimize SLSQP at a
tight tolerance (and checked against trust-constr). Output: grunfeld_weights.json.

Run:  python3 grunfeld_weights.py   (numpy, scipy, statsmodels; versions are written to the JSON)
"""
import json, os, sys
import numpy as np
import scipy, statsmodels
from scipy.optimize import minimize, LinearConstraint, Bounds
import statsmodels.datasets.grunfeld as grunfeld

here = os.path.dirname(os.path.abspath(__file__))
df = grunfeld.load_pandas().data
df["year"] = df["year"].astype(int)
df = df[["firm", "year", "invest", "value", "capital"]]
csv_path = os.path.join(here, "..", "data", "grunfeld.csv")
df.to_csv(csv_path, index=False, float_format="%.10g")

firms = list(dict.fromkeys(df["firm"]))
years = sorted(df["year"].unique())
pre = [y for y in years if y <= 1949]
Y = np.array([[float(df[(df.firm == f) & (df.year == y)].invest.iloc[0]) for y in pre] for f in firms])

def solve(i):
    donors = [j for j in range(len(firms)) if j != i]
    X = Y[donors].T  # T0 x J
    y = Y[i]
    T0, J = X.shape
    s = np.var(y) + 1.0  # scale the objective to O(1) for the solvers' tolerances
    f = lambda w: np.sum((y - X @ w) ** 2) / T0 / s
    g = lambda w: -2.0 * X.T @ (y - X @ w) / T0 / s
    best = None
    for start in [np.full(J, 1.0 / J)] + [np.eye(J)[k] for k in range(J)]:
        r = minimize(f, start, jac=g, method="SLSQP", bounds=[(0.0, 1.0)] * J,
                     constraints=[{"type": "eq", "fun": lambda w: np.sum(w) - 1.0, "jac": lambda w: np.ones(J)}],
                     options={"ftol": 1e-16, "maxiter": 5000})
        if best is None or r.fun < best.fun:
            best = r
    w = np.clip(best.x, 0.0, None)
    w /= w.sum()
    tc = minimize(f, np.full(J, 1.0 / J), jac=g, hess=lambda w: 2.0 * X.T @ X / T0 / s, method="trust-constr",
                  constraints=[LinearConstraint(np.ones((1, J)), 1.0, 1.0)], bounds=Bounds(np.zeros(J), np.ones(J)),
                  options={"gtol": 1e-14, "xtol": 1e-14, "maxiter": 20000})
    mspe = float(np.sum((y - X @ w) ** 2) / T0)
    return {
        "treated": firms[i],
        "donors": [firms[j] for j in donors],
        "weights": [float(v) for v in w],
        "mspe": mspe,
        "trust_constr_max_weight_diff": float(np.max(np.abs(np.clip(tc.x, 0, None) / np.clip(tc.x, 0, None).sum() - w))),
        "slsqp_status": int(best.status),
    }

out = {
    "source": "statsmodels.datasets.grunfeld (Grunfeld 1958), outcome invest, pre-period 1935-1949",
    "solver": "scipy.optimize.minimize SLSQP ftol=1e-16, best of 11 starts; cross-checked with trust-constr",
    "objective": "mean squared pre-period gap sum_t (y_t - sum_j w_j x_jt)^2 / T0",
    "versions": {"python": sys.version.split()[0], "numpy": np.__version__, "scipy": scipy.__version__,
                 "statsmodels": statsmodels.__version__},
    "pre_years": [int(y) for y in pre],
    "fits": [solve(i) for i in range(len(firms))],
}
with open(os.path.join(here, "grunfeld_weights.json"), "w") as fh:
    json.dump(out, fh, indent=1)
for fit in out["fits"]:
    print(fit["treated"], round(fit["mspe"], 6), fit["slsqp_status"], f"{fit['trust_constr_max_weight_diff']:.1e}")
