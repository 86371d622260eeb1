#!/usr/bin/env bash
# Spark equality check of `aftercast windows` (run by .ci/run; not part of cargo test).
#
# Installs pyspark from PyPI into a virtual environment (default /tmp/venv-spark; Java 17 must
# be on the PATH), then runs the same windows natively and through `--engine spark` (the
# emitted Spark SQL, local[2]) on
#   1. the hand-computed fixture (crates/aftercast-windows/tests/fixtures), and
#   2. a generated log of 1,000,000 events (20,000 units, 0.1% rows of unknown units, skipped),
# and asserts the unit tables, the daily series and the sidecar counts are equal row for row.
# Environment: SPARK_VENV (venv folder), WORK (scratch folder, default a fresh mktemp -d),
# EVENTS (number of generated events, default 1000000).
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
root="$(cd "$here/../.." && pwd)"
venv="${SPARK_VENV:-/tmp/venv-spark}"
work="${WORK:-$(mktemp -d)}"
events="${EVENTS:-1000000}"
mkdir -p "$work"

if [ ! -x "$venv/bin/spark-submit" ]; then
  echo "== installing pyspark into $venv"
  python3 -m venv "$venv"
  "$venv/bin/pip" install --quiet pyspark
fi
echo "== pyspark $("$venv/bin/python" -c 'import pyspark; print(pyspark.__version__)'), $(java -version 2>&1 | head -1)"

cd "$root"
cargo build --quiet -p aftercast-cli
# The dev profile builds dependencies optimised (see Cargo.toml), so the generator is fast
# enough without a separate release build; honour CARGO_TARGET_DIR as CI sets it.
cargo build --quiet -p aftercast-windows --example gen_events
target="${CARGO_TARGET_DIR:-$root/target}"
bin="$target/debug/aftercast"
gen="$target/debug/examples/gen_events"
submit="$venv/bin/spark-submit"

run_both() { # name, then the windows flags (without --output/--series-output/--engine)
  local name="$1"; shift
  local t0 t1 t2
  t0=$(date +%s.%N)
  "$bin" windows "$@" --quiet --output "$work/$name.native.csv" --series-output "$work/$name.native.series.csv"
  t1=$(date +%s.%N)
  "$bin" windows "$@" --quiet --engine spark --spark-submit "$submit" --spark-work "$work/$name.spark-work" \
    --output "$work/$name.spark.csv" --series-output "$work/$name.spark.series.csv"
  t2=$(date +%s.%N)
  printf '  %s: native %.1f s, spark %.1f s\n' "$name" "$(echo "$t1 - $t0" | bc)" "$(echo "$t2 - $t1" | bc)"
  "$venv/bin/python" "$here/compare.py" \
    "$work/$name.native.csv" "$work/$name.spark.csv" \
    "$work/$name.native.series.csv" "$work/$name.spark.series.csv" \
    "$work/$name.native.windows.json" "$work/$name.spark.windows.json"
}

echo "== fixture"
fx="$root/crates/aftercast-windows/tests/fixtures"
run_both fixture --events "$fx/events.csv" --exposures "$fx/exposures.csv" --group region \
  --window 7d --window deferred:2d+3d --window pre:3d --window calendar:2d \
  --metric orders=sum,count,active_days,mean_per_active_day,any --metric revenue=sum \
  --ratio rpo=revenue/orders --allow-negative revenue \
  --tz +02:00 --from 2024-02-01 --until 2024-03-20 --reference 2024-03-10 --series daily

echo "== fixture, day-start anchoring, weekly series, UTC"
run_both fixture_daystart --events "$fx/events.csv" --exposures "$fx/exposures.csv" --group region \
  --window 7d --window pre:3d --metric orders=sum,active_days,any --anchoring day-start \
  --from 2024-02-01 --until 2024-03-20 --reference 2024-03-10 --series weekly

echo "== generated log: $events events"
"$gen" --events "$events" --units 20000 --out-events "$work/gen.parquet" --out-exposures "$work/gen_exposures.csv"
run_both generated --events "$work/gen.parquet" --exposures "$work/gen_exposures.csv" --group region \
  --window 7d --window 14d --window 28d --window pre:28d --window deferred:3d+7d --window calendar:14d \
  --metric visit=sum,count,active_days,any --metric order=sum,count,active_days,mean_per_active_day \
  --metric refund=sum --ratio net=refund/order \
  --tz +02:00 --from 2026-01-01 --until 2026-04-01 --reference 2026-02-15 --bad-rows skip --series daily

echo "== all equal"
