"""Reference equal-tailed intervals: numpy.quantile with its default ('linear', Hyndman & Fan
type 7) method, on a stored vector of draws.

Run from crates/aftercast-resample:  python tests/reference/quantile_reference.py
Version used for the committed values: numpy 2.4.6 (also written into the JSON).
"""
import json
import os

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
rng = np.random.default_rng(90210)
# A skewed, heavy-ish tailed draw vector (gamma plus a normal), odd length so the median is an
# order statistic and the type-7 interpolation matters at the interval ends.
draws = rng.gamma(2.0, 1.5, size=2001) + rng.normal(0.0, 0.5, size=2001) - 2.0
levels = [0.5, 0.8, 0.9, 0.95, 0.99]
out = {
    "source": "numpy.quantile (default method 'linear'); numpy.median; numpy.mean; numpy.std(ddof=1)",
    "numpy_version": np.__version__,
    "draws": [float(v) for v in draws],
    "mean": float(np.mean(draws)),
    "median": float(np.median(draws)),
    "sd": float(np.std(draws, ddof=1)),
    "intervals": [],
}
for level in levels:
    tail = (1.0 - level) / 2.0
    out["intervals"].append(
        {
            "level": level,
            "lower": float(np.quantile(draws, tail)),
            "upper": float(np.quantile(draws, 1.0 - tail)),
        }
    )
with open(os.path.join(HERE, "quantiles_numpy.json"), "w") as f:
    json.dump(out, f)
print({k: v for k, v in out.items() if k != "draws"})
