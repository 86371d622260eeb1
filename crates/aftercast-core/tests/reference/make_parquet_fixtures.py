"""Parquet fixtures for the core readers, written by pyarrow (an independent Parquet writer),
so the reader is tested on files this project did not write. pyarrow 26.0.1, Python 3.11.
Run: python make_parquet_fixtures.py (writes ../data/*.parquet and the CSV twins)."""
import datetime as dt
import pathlib

import pyarrow as pa
import pyarrow.parquet as pq

out = pathlib.Path(__file__).resolve().parent.parent / "data"
out.mkdir(exist_ok=True)

# A daily series: date32 time column, float64 outcome, int64 control, snappy-compressed.
dates = [dt.date(2024, 1, 1) + dt.timedelta(days=i) for i in range(30)]
orders = [100.0 + 0.5 * i + (i % 7) * 3.25 for i in range(30)]
calls = [40 + (i % 5) for i in range(30)]
t = pa.table({"date": pa.array(dates, pa.date32()), "orders": orders, "calls": pa.array(calls, pa.int64())})
pq.write_table(t, out / "daily.parquet", compression="snappy", row_group_size=8)
with open(out / "daily.csv", "w") as f:
    f.write("date,orders,calls\n")
    for d, o, c in zip(dates, orders, calls):
        f.write(f"{d.isoformat()},{o!r},{c}\n")

# A unit table: string ids, bool treatment, int32 and float32 covariates, a string category,
# and one null outcome (row 4) for the missing-value policy.
ids = [f"u{i:03d}" for i in range(12)]
treat = [i % 3 == 0 for i in range(12)]
age = pa.array([21 + i for i in range(12)], pa.int32())
score = pa.array([0.25 * i for i in range(12)], pa.float32())
region = ["north", "south", "east"] * 4
spend = [float(10 * i) if i != 4 else None for i in range(12)]
u = pa.table({"id": ids, "treat": treat, "age": age, "score": score, "region": region, "spend": spend})
pq.write_table(u, out / "units.parquet", compression="zstd")

# A long panel with a timestamp[us] week column (midnight UTC) and a string unit column.
rows = []
for unit in ["a", "b", "c"]:
    for w in range(6):
        rows.append((unit, dt.datetime(2024, 1, 1) + dt.timedelta(weeks=w), 50.0 + w + ord(unit)))
p = pa.table({
    "unit": [r[0] for r in rows],
    "week": pa.array([r[1] for r in rows], pa.timestamp("us")),
    "revenue": [r[2] for r in rows],
})
pq.write_table(p, out / "panel.parquet")
print("written to", out)
