"""Compare the native and the Spark outputs of `aftercast windows` row for row.

Usage: compare.py NATIVE.csv SPARK.csv [NATIVE_SERIES.csv SPARK_SERIES.csv] [NATIVE.json SPARK.json]
Rows are matched in order after sorting by their key columns (unit; group and day); every cell
must agree: text exactly, numbers to a relative 1e-12 (sums of the check data are exact in f64
on both engines, so in practice they agree exactly), empty cells (excluded windows) only with
empty cells. The sidecars must agree except for the engine name.
"""
import csv
import json
import sys


def rows(path, key):
    with open(path, newline="") as f:
        r = list(csv.reader(f))
    header, body = r[0], r[1:]
    idx = [header.index(k) for k in key]
    body.sort(key=lambda row: [row[i] for i in idx])
    return header, body


def same_cell(a, b):
    if a == b:
        return True
    if a == "" or b == "":
        return False
    try:
        x, y = float(a), float(b)
    except ValueError:
        return False
    return abs(x - y) <= 1e-12 * max(1.0, abs(x), abs(y))


def compare_tables(native, spark, key):
    hn, bn = rows(native, key)
    hs, bs = rows(spark, key)
    assert hn == hs, f"headers differ:\n{hn}\n{hs}"
    assert len(bn) == len(bs), f"{native}: {len(bn)} rows, {spark}: {len(bs)} rows"
    cells = 0
    for i, (a, b) in enumerate(zip(bn, bs)):
        for c, (x, y) in enumerate(zip(a, b)):
            assert same_cell(x, y), f"row {i} ({a[0]}), column {hn[c]}: native {x!r}, spark {y!r}"
            cells += 1
    print(f"  {native} == {spark}: {len(bn)} rows, {cells} cells")


def compare_sidecars(native, spark):
    a, b = json.load(open(native)), json.load(open(spark))
    a.pop("engine"), b.pop("engine")
    assert a == b, f"sidecars differ:\n{json.dumps(a, indent=1)}\n{json.dumps(b, indent=1)}"
    print(f"  {native} == {spark} (window definitions and counts)")


args = sys.argv[1:]
compare_tables(args[0], args[1], ["unit"])
rest = args[2:]
if len(rest) >= 4:
    compare_tables(rest[0], rest[1], ["group", "day"])
    rest = rest[2:]
if len(rest) >= 2:
    compare_sidecars(rest[0], rest[1])
