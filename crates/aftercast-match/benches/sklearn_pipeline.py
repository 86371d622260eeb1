"""The benchmark job of benches/match_bench.rs done with scikit-learn, for the ratio in
docs/performance.md ("match").

1,000,000 units (10% treated), 10 standard-normal covariates, treatment logistic in them,
outcome = sum of covariates + 1 * treated + noise (same design as the Rust bench; numpy's
generator, so not the same draws).

Pipeline timed: StandardScaler + LogisticRegression(C=inf, i.e. no penalty) -> logit of the score ->
caliper 0.2 SD -> NearestNeighbors(n_neighbors=1) of every treated unit among controls (with
replacement: scikit-learn has no greedy matching without replacement) -> Abadie-Imbens ATT
variance with J = 2 same-group neighbours (NearestNeighbors again), in numpy.

Run: python3 -m venv /tmp/venv && /tmp/venv/bin/pip install scikit-learn==1.9.1 numpy==2.4.6 pandas==3.1.1
     /tmp/venv/bin/python sklearn_pipeline.py
Versions used for the recorded numbers: scikit-learn 1.9.1, numpy 2.4.6, pandas 3.1.1, Python 3.11.

Whole-process mode (docs/performance.md, "data layer"): `sklearn_pipeline.py --csv FILE --json OUT`
reads the unit table written by `cargo run --release -p aftercast-core --example make_units`
(columns id, treated, y, x1..x10) with pandas.read_csv, runs the same pipeline once and writes
ATT, standard error and matched count as JSON: the job `aftercast match --method nearest --replace`
does from the same file. benches/csv_side_by_side.py times both processes.
"""
import json
import sys
import time

import numpy as np
import sklearn
from sklearn.linear_model import LogisticRegression
from sklearn.neighbors import NearestNeighbors
from sklearn.preprocessing import StandardScaler

def pipeline(X, t, y):
    n = len(y)
    Z = StandardScaler().fit_transform(X)
    lr = LogisticRegression(C=np.inf, solver="newton-cholesky", tol=1e-9, max_iter=100).fit(Z, t)
    s = lr.decision_function(Z)
    cal = 0.2 * s.std(ddof=1)
    ti, ci = np.flatnonzero(t), np.flatnonzero(~t)
    nn = NearestNeighbors(n_neighbors=1).fit(s[ci, None])
    d, j = nn.kneighbors(s[ti, None])
    ok = d[:, 0] <= cal
    mt, mc = ti[ok], ci[j[ok, 0]]
    diff = y[mt] - y[mc]
    att = diff.mean()
    # Abadie-Imbens: K_j usage counts; s2 by J = 2 same-group neighbours
    K = np.bincount(mc, minlength=n).astype(float)
    s2 = np.zeros(n)
    for grp in (ti, ci):
        nb = NearestNeighbors(n_neighbors=3).fit(s[grp, None])
        _, idx = nb.kneighbors(s[grp, None])
        m = y[grp[idx[:, 1:]]].mean(axis=1)
        s2[grp] = 2 / 3 * (y[grp] - m) ** 2
    n1 = len(mt)
    v = (((diff - att) ** 2).sum() + ((K[ci] ** 2 - K[ci]) * s2[ci]).sum()) / n1 ** 2
    return att, np.sqrt(v), n1


def in_memory():
    rng = np.random.default_rng(42)
    n, p = 1_000_000, 10
    b = np.array([0.4, -0.3, 0.2, 0.25, -0.15, 0.1, 0.3, -0.2, 0.05, 0.15])
    X = rng.standard_normal((n, p))
    eta = -2.45 + X @ b
    t = rng.random(n) < 1 / (1 + np.exp(-eta))
    y = X.sum(axis=1) + t + rng.standard_normal(n)
    times = []
    for _ in range(3):
        t0 = time.perf_counter()
        att, se, n1 = pipeline(X, t, y)
        times.append(time.perf_counter() - t0)
    print(f"scikit-learn {sklearn.__version__} numpy {np.__version__}: ATT {att:.4f} se {se:.4f} matched {n1}")
    print("seconds per run:", ", ".join(f"{x:.2f}" for x in times), f"(best {min(times):.2f})")


def from_csv(path, out):
    import pandas as pd

    df = pd.read_csv(path)
    X = df[[f"x{j}" for j in range(1, 11)]].to_numpy()
    t = df["treated"].to_numpy() == 1
    y = df["y"].to_numpy()
    att, se, n1 = pipeline(X, t, y)
    with open(out, "w") as f:
        json.dump({"att": att, "se": se, "matched": int(n1)}, f)


if __name__ == "__main__":
    if "--csv" in sys.argv:
        a = sys.argv
        from_csv(a[a.index("--csv") + 1], a[a.index("--json") + 1])
    else:
        in_memory()
