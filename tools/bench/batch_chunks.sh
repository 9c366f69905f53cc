#!/usr/bin/env bash
# Peak memory of a chunked batch run (DEVELOPERS.md, "Batch runs", single large file):
# depot station 1 six times side by side in one LAS file (4 298 046 points), descriptors of
# every point at radius R: `features` on the file, `batch` reading it whole (default memory
# budget), and `batch --memory-budget` at each SIZE (the file cut in spatial blocks).
# Usage: tools/bench/batch_chunks.sh [RADIUS] [SIZE...]; THREADS=N in the environment passes
# --threads N (after cargo build --release --bin equiscan --example cut_tiles). Prints one
# line per process: wall and CPU seconds, peak resident memory, blocks; then whether the
# chunked rows are the bytes of the whole run.
set -euo pipefail
cd "$(dirname "$0")/../.."
R=${1:-0.05}
shift || true
SIZES=("$@")
if [ ${#SIZES[@]} -eq 0 ]; then SIZES=(400M 200M); fi
TH=()
if [ -n "${THREADS:-}" ]; then TH=(--threads "$THREADS"); fi
BIN=${BIN:-target/release/equiscan}
CUT=${CUT:-target/release/examples/cut_tiles}
T=$(mktemp -d -p "$( [ -d /dev/shm ] && echo /dev/shm || echo "${TMPDIR:-/tmp}")")
trap 'rm -rf "$T"' EXIT
"$CUT" scans/depot_station1.laz "$T/six.las" 1 1 las 6
timed() { # LABEL COMMAND...
    local label=$1
    shift
    /usr/bin/time -f "$label wall %e s cpu %U+%S s peak %M KB" "$@" 2>&1 >/dev/null | grep -E "blocks|wall"
}
timed "features whole" "$BIN" features "$T/six.las" -o "$T/f.npy" -r "$R" -q "${TH[@]}"
timed "batch whole" "$BIN" batch "$T/six.las" -o "$T/whole" -r "$R" -q "${TH[@]}"
for s in "${SIZES[@]}"; do
    timed "batch --memory-budget $s" "$BIN" batch "$T/six.las" -o "$T/cut_$s" -r "$R" --memory-budget "$s" "${TH[@]}"
    if cmp -s "$T/whole/six.npy" "$T/cut_$s/six.npy"; then
        echo "  $s: rows bit-identical to the whole run"
    else
        echo "  $s: rows differ in bytes from the whole run (tests/batch_chunks.rs checks the bound)"
    fi
done
