"""The data-layer benchmarks of docs/performance.md ("data layer"), whole processes timed with
/usr/bin/time (wall seconds, peak resident memory):

  load     `aftercast inspect` of the 1,000,000 x 13 unit table (every column read as numbers)
  match    `aftercast match --method nearest --replace` on it, side by side with pandas +
           scikit-learn doing the same job (crates/aftercast-match/benches/csv_side_by_side.py)
  match10  `aftercast match --method nearest` on the 10,000,000 x 13 table (peak memory)
  compare  `aftercast compare` of the NSW experiment with the CPS-1 pool (reference data)
  demo     `aftercast demo`

Run (release build; the tables are written by the make_units example when missing):
  cargo build --release -p aftercast-cli
  python3 crates/aftercast-core/benches/data_layer.py --bin target/release/aftercast \
      [--dir /tmp/aftercast-bench] [--runs 3] [--only load,compare] [--python /tmp/venv/bin/python]
"""
import argparse
import os
import shutil
import subprocess
import sys
import tempfile

here = os.path.dirname(os.path.abspath(__file__))
root = os.path.abspath(os.path.join(here, "..", "..", ".."))
ap = argparse.ArgumentParser()
ap.add_argument("--bin", required=True)
ap.add_argument("--dir", default=os.path.join(tempfile.gettempdir(), "aftercast-bench"))
ap.add_argument("--runs", type=int, default=3)
ap.add_argument("--only", default="load,match,match10,compare,demo")
ap.add_argument("--python", default=sys.executable, help="a Python with pandas and scikit-learn, for 'match'")
args = ap.parse_args()
os.makedirs(args.dir, exist_ok=True)
only = set(args.only.split(","))
covs = ",".join(f"x{j}" for j in range(1, 11))


def table(rows):
    path = os.path.join(args.dir, f"units_{rows}.csv")
    if not os.path.exists(path):
        subprocess.run(["cargo", "run", "--release", "-q", "-p", "aftercast-core", "--example", "make_units", "--",
                        str(rows), path], check=True, cwd=root)
    return path


def timed(cmd, runs):
    out = []
    for _ in range(runs):
        r = subprocess.run(["/usr/bin/time", "-f", "%e %M"] + cmd, capture_output=True, text=True)
        if r.returncode != 0:
            sys.exit(f"failed: {' '.join(cmd)}\n{r.stderr}")
        wall, kb = r.stderr.strip().splitlines()[-1].split()
        out.append((float(wall), int(kb) / 1024))
    return out


def report(name, rows, note=""):
    walls = ", ".join(f"{w:.2f}" for w, _ in rows)
    print(f"{name:>8}: wall {walls} s (best {min(w for w, _ in rows):.2f}); peak {max(m for _, m in rows):.0f} MiB {note}")


if "load" in only:
    path = table(1_000_000)
    size = os.path.getsize(path) / 2**20
    rows = timed([args.bin, "inspect", "--data", path, "--quiet"], args.runs)
    report("load", rows, f"(file {size:.1f} MiB; peak / file {max(m for _, m in rows) / size:.2f})")
if "match" in only:
    path = table(1_000_000)
    subprocess.run([args.python, os.path.join(root, "crates/aftercast-match/benches/csv_side_by_side.py"),
                    "--bin", args.bin, "--csv", path, "--runs", str(args.runs)], check=True)
if "match10" in only:
    path = table(10_000_000)
    size = os.path.getsize(path) / 2**20
    rows = timed([args.bin, "match", "--data", path, "--treatment", "treated", "--outcome", "y", "--covariates", covs,
                  "--method", "nearest", "--quiet", "--json", os.path.join(args.dir, "match10.json")], 1)
    report("match10", rows, f"(file {size:.0f} MiB)")
if "compare" in only:
    ref = os.path.join(root, "..", "shared", "reference-data")
    rows = timed([args.bin, "compare", "--experiment", os.path.join(ref, "nsw_dehejia_wahba.csv"), "--arm", "treat",
                  "--outcome", "re78", "--pool", os.path.join(ref, "cps1_comparison.csv"), "--covariates",
                  "age,educ,black,hisp,marr,nodegree,re74,re75", "--quiet"], args.runs)
    report("compare", rows)
if "demo" in only:
    rows = []
    for _ in range(args.runs):
        out = os.path.join(args.dir, "demo")
        shutil.rmtree(out, ignore_errors=True)
        rows += timed([args.bin, "demo", "--out", out, "--quiet"], 1)
    report("demo", rows)
