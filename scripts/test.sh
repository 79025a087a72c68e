#!/usr/bin/env bash
# The whole test suite, as the README gives it and CI runs it:
#   1. `cargo test` (the engine, the command, the readers, the studies);
#   2. the Python package: a fresh virtual environment, `pip install .` with the test
#      extras (maturin builds the engine once, in release mode, into this checkout's
#      target/), then pytest. Any pytest failure fails the run, and so does exit 5
#      ("no tests ran").
# Needs a Rust toolchain and python3 with its venv module (Debian: python3-venv).
set -euo pipefail
cd "$(dirname "$0")/.."

cargo test

if ! command -v python3 >/dev/null 2>&1 || ! python3 -c 'import venv, ensurepip' >/dev/null 2>&1; then
  echo "scripts/test.sh: python3 with the venv module is needed for the Python package's tests" >&2
  exit 1
fi
venv="$(mktemp -d)/venv"
python3 -m venv "$venv"
"$venv/bin/python" -m pip install -q --upgrade pip
CARGO_TARGET_DIR="$PWD/target" "$venv/bin/python" -m pip install -q ".[test]"
# From python/tests, `import unblend` is the installed package, not the source.
(cd python/tests && "$venv/bin/python" -m pytest -q -p no:cacheprovider .)
