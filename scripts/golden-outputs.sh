#!/usr/bin/env bash
# Runs the demo and fit / batch / calibrate / discover / library check on the shipped
# demo data with a given binary and writes every output into one folder, so two builds
# can be compared with `diff -r` (used for refactors that must not change results).
#
#   scripts/golden-outputs.sh target/release/unblend /tmp/golden-before
set -uo pipefail
BIN=$(realpath "$1"); OUT=$2
cd "$(dirname "$0")/.."
ROOT=$PWD
rm -rf "$OUT"; mkdir -p "$OUT"; cd "$OUT"
run() { local name=$1; shift; "$BIN" "$@" >"$name.stdout" 2>"$name.stderr"; echo "exit $?" >>"$name.stdout"; }
run demo demo
run fit-table fit "$ROOT/demo-data/lot-check.csv" --library "$ROOT/library"
run fit-csv fit "$ROOT/demo-data/lot-check.csv" --library "$ROOT/library" --format csv --out fit.csv
run fit-json fit "$ROOT/demo-data/lot-check.csv" --library "$ROOT/library" --format json --out fit.json
run fit-long fit "$ROOT/demo-data/lot-check-long.csv" --library "$ROOT/library" --components fjord-blue,saffron-yellow,ember-red --format csv
mkdir -p cand
run add1 library add umber-brown --spectrum "$ROOT/demo-data/candidates/umber-brown.csv" --library cand
run add2 library add slate-violet --spectrum "$ROOT/demo-data/candidates/slate-violet.csv" --library cand
run screen fit "$ROOT/demo-data/lot-check.csv" --library "$ROOT/library" --screen-with cand --format json --out screen.json
run discover discover "$ROOT/demo-data/lot-check.csv" --library "$ROOT/library" --out unknown.csv
run check library check --library "$ROOT/library" --range-nm 350:750
run check-json library check --library "$ROOT/library" --components fjord-blue,ember-red --noise-au 0.002 --format json
run cal calibrate "$ROOT/demo-data/calibration/saffron-standards.csv" --concentrations "$ROOT/demo-data/calibration/saffron-concentrations.csv" --name saffron-cal --molar-mass 452.4 --library mylib --linearity-tolerance 0.02 --out cal-lines.csv
"$ROOT/target/release/examples/make-plates" --plates 3 --out plates >/dev/null 2>&1
run batch batch plates/plates.txt --plate-map plates/map.csv --library "$ROOT/library" --out-dir batch-out
rm -f batch-out/run-log.txt.tmp* 2>/dev/null
# strip lines that carry times or versions that legitimately differ
grep -rl . . >/dev/null
echo "outputs in $OUT"
