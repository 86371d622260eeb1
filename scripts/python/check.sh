#!/usr/bin/env bash
# The Python package's checks (run by .ci/run; not part of cargo test, which needs no Python).
#
# Creates a virtual environment (default /tmp/venv-aftercast-py; PY_VENV overrides) with
# maturin, pytest, numpy, pandas, pyarrow and polars, builds the module into it with the dev
# profile (`maturin develop`: the same profile as the `aftercast` binary the tests compare
# against, sharing CARGO_TARGET_DIR), then runs crates/aftercast-py/tests with pytest.
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
root="$(cd "$here/../.." && pwd)"
venv="${PY_VENV:-/tmp/venv-aftercast-py}"

if [ ! -x "$venv/bin/maturin" ] || ! "$venv/bin/python" -c 'import pytest, pandas, pyarrow, polars, numpy' 2>/dev/null; then
  echo "== installing maturin, pytest, numpy, pandas, pyarrow, polars into $venv"
  python3 -m venv "$venv"
  "$venv/bin/pip" install --quiet "maturin>=1.5,<2" pytest numpy pandas pyarrow polars
fi
echo "== $("$venv/bin/python" --version), maturin $("$venv/bin/maturin" --version | awk '{print $2}'), pandas $("$venv/bin/python" -c 'import pandas; print(pandas.__version__)'), pyarrow $("$venv/bin/python" -c 'import pyarrow; print(pyarrow.__version__)')"

cd "$root"
target="${CARGO_TARGET_DIR:-$root/target}"
# the binary the tests compare against
cargo build --quiet --locked -p aftercast-cli
(
  cd crates/aftercast-py
  VIRTUAL_ENV="$venv" PATH="$venv/bin:$PATH" "$venv/bin/maturin" develop --quiet --profile dev --locked
)
AFTERCAST_BIN="$target/debug/aftercast" "$venv/bin/python" -m pytest -q crates/aftercast-py/tests
