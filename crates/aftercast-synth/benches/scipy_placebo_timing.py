"""Timing of the benchmark job of benches/synth.rs with scipy SLSQP, for docs/performance.md.

Same panel as the Rust benchmark (SplitMix64 + Box-Muller factor model, seed 20260101, 401 units
x 220 periods, pre-period 0..199). The job: simplex-constrained least-squares weights of unit
u400 on the 400 other units, then the placebo in space (every donor against the other 399
donors): 401 fits. SLSQP on 400 variables takes seconds per fit, so this script times the first
N_FITS fits of the job sequentially and extrapolates to 401 fits on 2 worker processes (ideal
speed-up; stated as an extrapolation in the docs).

Run:  python3 scipy_placebo_timing.py [N_FITS]
"""
import math, sys, time
import numpy as np
import scipy
from scipy.optimize import minimize

MASK = (1 << 64) - 1

def panel():
    state = 20260101
    def nxt():
        nonlocal state
        state = (state + 0x9E3779B97F4A7C15) & MASK
        z = state
        z = ((z ^ (z >> 30)) * 0xBF58476D1CE4E5B9) & MASK
        z = ((z ^ (z >> 27)) * 0x94D049BB133111EB) & MASK
        return ((z ^ (z >> 31)) >> 11) / float(1 << 53)
    def normal():
        u1 = max(nxt(), 1e-300)
        u2 = nxt()
        return math.sqrt(-2.0 * math.log(u1)) * math.cos(2.0 * math.pi * u2)
    units, periods = 401, 220
    f1 = [math.sin(t / 4.0) * 3.0 + normal() for t in range(periods)]
    f2 = [0.0] * periods
    for t in range(1, periods):
        f2[t] = 0.8 * f2[t - 1] + normal()
    y = np.zeros((units, periods))
    for i in range(units):
        a, l1, l2 = 20.0 + 2.0 * normal(), 1.0 + 0.5 * normal(), 1.0 + 0.5 * normal()
        for t in range(periods):
            y[i, t] = a + l1 * f1[t] + l2 * f2[t] + normal()
    return y

def fit(y, target, donors, t0=200):
    X = y[donors, :t0].T
    v = y[target, :t0]
    J = X.shape[1]
    H = X.T @ X / t0
    c = X.T @ v / t0
    f = lambda w: w @ H @ w - 2 * c @ w
    g = lambda w: 2 * (H @ w - c)
    r = minimize(f, np.full(J, 1.0 / J), jac=g, method="SLSQP", bounds=[(0.0, 1.0)] * J,
                 constraints=[{"type": "eq", "fun": lambda w: w.sum() - 1.0, "jac": lambda w: np.ones(J)}],
                 options={"ftol": 1e-12, "maxiter": 1000})
    return r

if __name__ == "__main__":
    n_fits = int(sys.argv[1]) if len(sys.argv) > 1 else 6
    y = panel()
    print("python", sys.version.split()[0], "numpy", np.__version__, "scipy", scipy.__version__)
    print("check value y[400, 199] =", repr(y[400, 199]))
    jobs = [(400, list(range(400)))] + [(d, [k for k in range(400) if k != d]) for d in range(400)]
    start = time.perf_counter()
    for target, donors in jobs[:n_fits]:
        r = fit(y, target, donors)
    per_fit = (time.perf_counter() - start) / n_fits
    print(f"SLSQP: {n_fits} fits, {per_fit:.3f} s per fit; 401 fits on 1 core ~ {401 * per_fit:.1f} s,"
          f" on 2 cores ~ {401 * per_fit / 2:.1f} s (extrapolated)")
