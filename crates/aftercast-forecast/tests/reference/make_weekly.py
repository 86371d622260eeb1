"""Write tests/data/weekly_series.csv: 260 weeks (5 years) of a weekly series with a yearly
pattern (period 52.18 weeks, two harmonics), a local level (random walk, sd 0.4), noise sd 1.5
and two regressors with coefficients 0.8 and -1.2. Standard library only (random.Random with a
fixed seed), so the file is reproducible without numpy.

    python3 crates/aftercast-forecast/tests/reference/make_weekly.py
"""
import math
import pathlib
import random

rng = random.Random(20261202)
n = 260
level = 100.0
c1 = c2 = 0.0
rows = []
for t in range(n):
    c1 = 0.6 * c1 + rng.gauss(0.0, 1.0)
    c2 = 0.3 * c2 + rng.gauss(0.0, 1.0)
    x1 = 20.0 + 3.0 * c1
    x2 = 5.0 + 2.0 * c2
    w = 2.0 * math.pi * t / 52.18
    season = 6.0 * math.sin(w) + 2.5 * math.cos(2.0 * w)
    y = level + season + 0.8 * x1 - 1.2 * x2 + rng.gauss(0.0, 1.5)
    rows.append((t, y, x1, x2))
    level += rng.gauss(0.0, 0.4)
out = pathlib.Path(__file__).resolve().parent.parent / "data" / "weekly_series.csv"
with out.open("w") as f:
    f.write("week,y,x1,x2\n")
    for t, y, x1, x2 in rows:
        f.write(f"{t},{y:.6f},{x1:.6f},{x2:.6f}\n")
print(f"wrote {out} ({n} rows)")
