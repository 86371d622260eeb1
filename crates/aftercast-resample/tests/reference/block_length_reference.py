"""Reference values for the automatic block length (Politis & White 2004, corrected by
Patton, Politis & White 2009), computed with the `arch` package's
`arch.bootstrap.optimal_block_length`.

Run from crates/aftercast-resample:  python tests/reference/block_length_reference.py
Versions used for the committed values: arch 8.0.0, numpy 2.4.6 (also written into the JSON).

Series (tests/data/):
- nile.csv: annual Nile flow at Aswan 1871-1970 (Durbin & Koopman 2012; exported from
  statsmodels.datasets.nile; copied from the project's shared reference data).
- ar1_phi06.csv, ar1_phi09.csv, ma2.csv, white_noise.csv: simulated here with numpy's
  default_rng at the seeds below and written with repr() precision, so the Rust tests read the
  very same numbers.
"""
import csv
import json
import os

import arch
import numpy as np
from arch.bootstrap import optimal_block_length

HERE = os.path.dirname(os.path.abspath(__file__))
DATA = os.path.join(HERE, "..", "data")


def write_series(name, values):
    with open(os.path.join(DATA, name), "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(["t", "value"])
        for t, v in enumerate(values):
            w.writerow([t, repr(float(v))])


def read_series(name, column):
    with open(os.path.join(DATA, name)) as f:
        return np.array([float(r[column]) for r in csv.DictReader(f)])


def ar1(phi, n, seed):
    rng = np.random.default_rng(seed)
    e = rng.standard_normal(n + 200)
    x = np.zeros(n + 200)
    for t in range(1, n + 200):
        x[t] = phi * x[t - 1] + e[t]
    return x[200:]


rng = np.random.default_rng(20260302)
e = rng.standard_normal(602)
ma2 = e[2:] + 0.6 * e[1:-1] + 0.3 * e[:-2]
write_series("ar1_phi06.csv", ar1(0.6, 1000, 11))
write_series("ar1_phi09.csv", ar1(0.9, 500, 12))
write_series("ma2.csv", ma2)
write_series("white_noise.csv", np.random.default_rng(13).standard_normal(300))

series = {
    "nile": read_series("nile.csv", "volume"),
    "ar1_phi06": read_series("ar1_phi06.csv", "value"),
    "ar1_phi09": read_series("ar1_phi09.csv", "value"),
    "ma2": read_series("ma2.csv", "value"),
    "white_noise": read_series("white_noise.csv", "value"),
}
out = {
    "source": "arch.bootstrap.optimal_block_length",
    "arch_version": arch.__version__,
    "numpy_version": np.__version__,
    "series": {},
}
for name, x in series.items():
    res = optimal_block_length(x)
    out["series"][name] = {
        "n": int(x.shape[0]),
        "stationary": float(res["stationary"].iloc[0]),
        "circular": float(res["circular"].iloc[0]),
    }
with open(os.path.join(HERE, "block_length_arch.json"), "w") as f:
    json.dump(out, f, indent=2)
print(json.dumps(out, indent=2))
