#!/usr/bin/env bash
# End-to-end speed of `unblend fit` from a CSV file: generates N synthetic
# spectra (default 100,000 × 401 wavelengths × 6 components; not committed),
# fits them with tidy CSV output to a file, and reports spectra/s and peak
# memory. With numpy and scipy installed, also runs the Python baseline
# (tests/bench/scipy_baseline.py) on the same data.
#
#   tests/bench/end_to_end.sh [N]
set -euo pipefail
cd "$(dirname "$0")/../.."
n=${1:-100000}
dir=${BENCH_DIR:-target/bench-data}
cargo build --release --quiet --example make-spectra
cargo build --release --quiet
./target/release/examples/make-spectra "$dir" "$n" 6
start=$(date +%s.%N)
/usr/bin/time -f "peak memory: %M KiB" -o "$dir/time.txt" \
  ./target/release/unblend fit "$dir/spectra.csv" --library "$dir/library" --format csv --out "$dir/results.csv"
end=$(date +%s.%N)
python3 - "$n" "$start" "$end" <<'PY'
import sys
n, s, e = int(sys.argv[1]), float(sys.argv[2]), float(sys.argv[3])
print(f"unblend fit end to end: {n / (e - s):,.0f} spectra/s ({e - s:.2f} s for {n} spectra)")
PY
cat "$dir/time.txt"
if python3 -c "import numpy, scipy" 2>/dev/null; then
  python3 tests/bench/scipy_baseline.py "$dir"
else
  echo "(numpy/scipy not installed: skipping the Python baseline)"
fi
