#!/usr/bin/env bash
# Every test suite: the Rust tests, then the Python package's tests against
# a wheel built from python/ into a private virtual environment under
# target/ (maturin, pytest and numpy come from PyPI when missing).
set -euo pipefail
cd "$(dirname "$0")/.."
cargo test --locked
cargo build --release --locked --bin lacuna
PY=${PYTHON:-python3}
command -v "$PY" >/dev/null 2>&1 || { echo "error: the Python tests need python3 (3.9 or newer) on PATH" >&2; exit 1; }
VENV=target/python-tests
[ -x "$VENV/bin/python" ] || "$PY" -m venv "$VENV"
"$VENV/bin/python" -c "import maturin, pytest, numpy" 2>/dev/null \
  || "$VENV/bin/python" -m pip install -q "maturin>=1.9.4,<2" "pytest>=7" "numpy>=1.21"
PATH="$PWD/$VENV/bin:$PATH" "$VENV/bin/python" -m pip install -q --no-build-isolation --force-reinstall --no-deps ./python
LACUNA_BIN="$PWD/target/release/lacuna" "$VENV/bin/python" -m pytest -q python/tests
