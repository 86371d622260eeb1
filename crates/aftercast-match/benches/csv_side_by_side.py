"""Whole-process timing, CSV file to result JSON: `aftercast match --method nearest --replace`
against pandas + scikit-learn doing the same job (sklearn_pipeline.py --csv), run alternately in
the same session; wall time and peak resident memory from /usr/bin/time. Numbers go to
docs/performance.md ("data layer").

Run:
  cargo run --release -p aftercast-core --example make_units -- 1000000 /tmp/units_1m.csv
  cargo build --release -p aftercast-cli
  /tmp/venv/bin/python crates/aftercast-match/benches/csv_side_by_side.py \\
      --bin target/release/aftercast --csv /tmp/units_1m.csv [--runs 3]
"""
import argparse
import json
import os
import subprocess
import sys
import tempfile

here = os.path.dirname(os.path.abspath(__file__))
ap = argparse.ArgumentParser()
ap.add_argument("--bin", required=True)
ap.add_argument("--csv", required=True)
ap.add_argument("--runs", type=int, default=3)
ap.add_argument("--skip-python", action="store_true")
args = ap.parse_args()
covs = ",".join(f"x{j}" for j in range(1, 11))
tmp = tempfile.mkdtemp()


def timed(cmd):
    r = subprocess.run(["/usr/bin/time", "-f", "%e %M"] + cmd, capture_output=True, text=True)
    if r.returncode != 0:
        sys.exit(f"failed: {' '.join(cmd)}\n{r.stderr}")
    wall, kb = r.stderr.strip().splitlines()[-1].split()
    return float(wall), int(kb) / 1024


ours = [args.bin, "match", "--data", args.csv, "--treatment", "treated", "--outcome", "y", "--covariates", covs,
        "--method", "nearest", "--replace", "--quiet", "--json", os.path.join(tmp, "ours.json")]
theirs = [sys.executable, os.path.join(here, "sklearn_pipeline.py"), "--csv", args.csv, "--json",
          os.path.join(tmp, "theirs.json")]
rows = {"aftercast": [], "pandas+scikit-learn": []}
for _ in range(args.runs):
    rows["aftercast"].append(timed(ours))
    if not args.skip_python:
        rows["pandas+scikit-learn"].append(timed(theirs))
size = os.path.getsize(args.csv) / 2**20
print(f"file {args.csv}: {size:.1f} MiB")
for name, rs in rows.items():
    if rs:
        walls = ", ".join(f"{w:.2f}" for w, _ in rs)
        print(f"{name:>20}: wall {walls} s (best {min(w for w, _ in rs):.2f}); peak {max(m for _, m in rs):.0f} MiB")
o = json.load(open(os.path.join(tmp, "ours.json")))
avg = o["effect"]["average"]
print(f"aftercast: ATT {avg['estimate']:.4f}, interval [{avg['lower']:.4f}, {avg['upper']:.4f}]")
if rows["pandas+scikit-learn"]:
    print("scikit-learn:", json.load(open(os.path.join(tmp, "theirs.json"))))
    best = lambda k: min(w for w, _ in rows[k])
    peak = lambda k: max(m for _, m in rows[k])
    print(f"ratio wall {best('pandas+scikit-learn') / best('aftercast'):.1f}x; "
          f"peak memory ours / theirs {peak('aftercast') / peak('pandas+scikit-learn'):.2f}")
