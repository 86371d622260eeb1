"""Reference values for aftercast-match tests, computed with statsmodels and scipy.

Run:  python3 -m venv /tmp/venv && /tmp/venv/bin/pip install statsmodels==0.15.0 scipy==1.17.1 numpy==2.4.6 pandas==3.1.1
      /tmp/venv/bin/python logit_reference.py      (from this directory)
Writes reference.json next to this script. cargo test never runs Python; it reads the JSON.

1. statsmodels Logit (Newton, tight tolerance) on the NSW treated + CPS-1 sample with the
   Dehejia & Wahba (1999) CPS specification as used in our tests:
   age, age^2, age^3, educ, educ^2, marr, nodegree, black, hisp, re74, re75,
   u74 = 1[re74 == 0], u75 = 1[re75 == 0], educ*re74.
   The fit is done on standardised columns (mean 0, sd 1 with n-1 divisor, as our design) and
   also on the raw columns; coefficients are reported on the raw scale.
2. scipy.stats.binomtest (alternative='greater') upper tails: the exact sign-test form of the
   Rosenbaum bound for binary matched-pair outcomes, p_upper = P(Bin(m, G/(1+G)) >= k).
3. scipy.stats.wilcoxon (alternative='greater', method='approx', correction=False) on fixed
   pair differences: the Rosenbaum bound at Gamma = 1.
"""
import json
import os

import numpy as np
import pandas as pd
import scipy
import scipy.stats as st
import statsmodels
import statsmodels.api as sm

here = os.path.dirname(os.path.abspath(__file__))
data = os.path.join(here, "..", "data")
nsw = pd.read_csv(os.path.join(data, "nsw_dehejia_wahba.csv"))
cps = pd.read_csv(os.path.join(data, "cps1_comparison.csv"))
df = pd.concat([nsw[nsw.treat == 1], cps], ignore_index=True)

cols = {
    "age": df.age, "educ": df.educ, "marr": df.marr, "nodegree": df.nodegree,
    "black": df.black, "hisp": df.hisp, "re74": df.re74, "re75": df.re75,
    "age^2": df.age ** 2, "age^3": df.age ** 3, "educ^2": df.educ ** 2,
    "zero(re74)": (df.re74 == 0).astype(float), "zero(re75)": (df.re75 == 0).astype(float),
    "educ:re74": df.educ * df.re74,
}
names = list(cols)
X = np.column_stack([np.asarray(cols[k], dtype=float) for k in names])
y = df.treat.to_numpy(dtype=float)
mean = X.mean(axis=0)
sd = X.std(axis=0, ddof=1)
Z = sm.add_constant((X - mean) / sd)
res = sm.Logit(y, Z).fit(method="newton", maxiter=200, tol=1e-11, disp=0)
assert res.mle_retvals["converged"], res.mle_retvals
assert np.max(np.abs(res.model.score(res.params))) < 1e-6
b = res.params
raw = np.empty_like(b)
raw[1:] = b[1:] / sd
raw[0] = b[0] - np.sum(b[1:] * mean / sd)

binom = []
for (k, m, g) in [(30, 40, 1.0), (30, 40, 2.0), (30, 40, 3.0), (55, 80, 1.5), (12, 15, 1.0), (120, 200, 1.2)]:
    p = g / (1 + g)
    binom.append({"k": k, "m": m, "gamma": g, "p_upper": float(st.binomtest(k, m, p, alternative="greater").pvalue)})

d = [1.3, -0.4, 2.2, 0.9, -1.1, 3.0, 0.5, 0.5, 1.7, -0.2, 2.5, 0.8, -0.6, 1.9, 1.2]
w = st.wilcoxon(d, alternative="greater", method="approx", correction=False, zero_method="wilcox")

out = {
    "generated_by": "tests/reference/logit_reference.py",
    "versions": {"statsmodels": statsmodels.__version__, "scipy": scipy.__version__,
                 "numpy": np.__version__, "pandas": pd.__version__},
    "logit": {
        "sample": "NSW treated (185) + CPS-1 (15992)",
        "terms": ["(intercept)"] + names,
        "coefficients": [float(v) for v in raw],
        "coefficients_standardised": [float(v) for v in b],
        "loglik": float(res.llf),
        "n": int(len(y)),
    },
    "binomtest_greater": binom,
    "wilcoxon_greater_approx": {"d": d, "p_value": float(w.pvalue), "statistic": float(w.statistic)},
}
with open(os.path.join(here, "reference.json"), "w") as f:
    json.dump(out, f, indent=1)
print(json.dumps(out["logit"], indent=1))
