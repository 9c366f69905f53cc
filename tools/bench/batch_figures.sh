#!/usr/bin/env bash
# Figures of `equiscan batch` (DEVELOPERS.md, "Batch runs"):
#  1. throughput over a 3 × 3 grid cut from depot station 1 against `features` on the merged
#     cloud (the whole station as one file of the same format), and with halos off: the halo
#     cost; LAS and LAZ tiles; wall-clock seconds and peak resident memory of each process;
#  2. peak memory over 54 tiles (the 3 × 3 grid side by side 6 times) against the 9 tiles.
# Usage: tools/bench/batch_figures.sh [RUNS] [RADIUS]; THREADS=N in the environment passes
# --threads N to every run.   (after cargo build --release
# --bin equiscan --example cut_tiles). Prints one line per process run.
set -euo pipefail
cd "$(dirname "$0")/../.."
RUNS=${1:-3}
R=${2:-0.05}
TH=()
if [ -n "${THREADS:-}" ]; then TH=(--threads "$THREADS"); fi
BIN=${BIN:-target/release/equiscan}
CUT=${CUT:-target/release/examples/cut_tiles}
# Outputs in memory (/dev/shm when there is one): on a shared disk, syncing the 390 MB of
# outputs dominated the wall-clock time (CPU 5 s, wall 19–35 s with one thread).
T=$(mktemp -d -p "$( [ -d /dev/shm ] && echo /dev/shm || echo "${TMPDIR:-/tmp}")")
trap 'rm -rf "$T"' EXIT
for ext in las laz; do
    "$CUT" scans/depot_station1.laz "$T/grid_$ext" 3 3 "$ext" >/dev/null
    "$CUT" scans/depot_station1.laz "$T/whole_$ext" 1 1 "$ext" >/dev/null
done
timed() { # LABEL COMMAND...
    local label=$1
    shift
    /usr/bin/time -f "$label wall %e s cpu %U+%S s peak %M KB" "$@" 2>&1 >/dev/null | tail -1
}
for k in $(seq "$RUNS"); do
    for ext in las laz; do
        rm -rf "$T/m.npy" "$T/m.npy.json" "$T/out" "$T/off"
        timed "run $k $ext features-merged" "$BIN" features "$T/whole_$ext/tile_0_0.$ext" -o "$T/m.npy" -r "$R" -q --force "${TH[@]}"
        timed "run $k $ext batch-halo" "$BIN" batch "$T/grid_$ext" -o "$T/out" -r "$R" -q "${TH[@]}"
        timed "run $k $ext batch-off" "$BIN" batch "$T/grid_$ext" -o "$T/off" -r "$R" -q --tile-grid off "${TH[@]}"
    done
done
"$CUT" scans/depot_station1.laz "$T/many" 3 3 las 6 >/dev/null
echo "tiles: $(ls "$T/many" | wc -l), points: 6 × 716341"
timed "54 tiles batch-halo" "$BIN" batch "$T/many" -o "$T/many_out" -r "$R" -q "${TH[@]}"
rm -rf "$T/out"
timed "9 tiles batch-halo" "$BIN" batch "$T/grid_las" -o "$T/out" -r "$R" -q "${TH[@]}"
