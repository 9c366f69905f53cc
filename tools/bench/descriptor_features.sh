#!/bin/sh
# The speed table of the descriptor engine: `equiscan features` against the numpy/scipy
# reference on a 50 000-point surface sample (tools/bench/scene.rs, seed 42, written by the
# descriptor_run example), L = 4, N = 6, norms + power spectrum, version 2, at support radii
# of 2.5 and 5 x the measured point spacing (about 20 and 80 neighbours per centre), one
# thread, CPU seconds of the whole process (read, index, descriptors, write; perf stat's task
# clock when perf is installed, else GNU time's user + system in hundredths):
# median of RUNS runs for each equiscan binary given (the binaries taking turns run by run),
# one run of the reference, all in one go so that the ratios share the machine's load. Prints each output's sha256 prefix, and that of
# a 2-thread run (the bytes must not depend on the thread count).
#
#   tools/bench/descriptor_features.sh [RUNS] [BINARY...]   (default target/release/equiscan)
#   PYTHON=/path/to/python (numpy + scipy) selects the interpreter of the reference.
set -eu
runs=${1:-5}
[ $# -gt 0 ] && shift
[ $# -gt 0 ] || set -- target/release/equiscan
py=${PYTHON:-python3}
dir=$(mktemp -d)
trap 'rm -rf "$dir"' EXIT
[ -x target/release/examples/descriptor_run ] || cargo build --release --locked --example descriptor_run
target/release/examples/descriptor_run 50000 1 --search-only --write "$dir/scene.ply" > "$dir/scene.txt"
spacing=$(sed -n 's/.*spacing \([0-9.]*\),.*/\1/p' "$dir/scene.txt")
echo "scene: 50000 points, measured spacing $spacing"
# CPU seconds of a command: `perf stat`'s task clock where perf is installed (microseconds),
# else GNU time's user + system (hundredths of a second only).
if command -v perf > /dev/null 2>&1 && perf stat -x, -e task-clock true > /dev/null 2>&1; then
    cpu() { perf stat -x, -e task-clock -o "$dir/t" "$@" > /dev/null 2>&1; awk -F, '/task-clock/ {printf "%.4f\n", $1 / 1000}' "$dir/t"; }
else
    cpu() { /usr/bin/time -f "%U %S" -o "$dir/t" "$@" > /dev/null 2>&1; awk '{printf "%.3f\n", $1 + $2}' "$dir/t"; }
fi
median() { sort -n | awk '{a[NR] = $1} END {print (NR % 2) ? a[(NR + 1) / 2] : (a[NR / 2] + a[NR / 2 + 1]) / 2}'; }
for k in 2.5 5; do
    r=$(awk -v s="$spacing" -v k="$k" 'BEGIN {printf "%.4g", s * k}')
    ref=$(cpu "$py" tools/fixtures/descriptor_reference.py time "$dir/scene.ply" "$r" 50000)
    echo "r = $k x spacing = $r: numpy/scipy reference $ref s"
    # The binaries take turns run by run, so that a change of the machine's load during the
    # measurement falls on all of them alike; each writes its own output.
    b=0
    for bin in "$@"; do
        : > "$dir/runs$b"
        b=$((b + 1))
    done
    i=0
    while [ $i -lt "$runs" ]; do
        b=0
        for bin in "$@"; do
            cpu "$bin" features "$dir/scene.ply" -o "$dir/f$b.npy" --radius "$r" --threads 1 --quiet >> "$dir/runs$b"
            b=$((b + 1))
        done
        i=$((i + 1))
    done
    b=0
    for bin in "$@"; do
        ours=$(median < "$dir/runs$b")
        one=$(sha256sum "$dir/f$b.npy" | cut -c1-16)
        # The sidecar is `f.npy.json` (`f.json` from binaries before its current name).
        side="$dir/f$b.npy.json"
        [ -f "$side" ] || side="$dir/f$b.json"
        hits=$(python3 -c 'import json, sys; print(round(json.load(open(sys.argv[1]))["metadata"]["counts"][0]["mean"], 1))' "$side")
        "$bin" features "$dir/scene.ply" -o "$dir/f2.npy" --radius "$r" --threads 2 --quiet
        two=$(sha256sum "$dir/f2.npy" | cut -c1-16)
        echo "  $bin: $hits neighbours per centre, $ours s (runs: $(tr '\n' ' ' < "$dir/runs$b")), reference / equiscan $(awk -v a="$ref" -v b="$ours" 'BEGIN {printf "%.0f", a / b}')x, output sha256 $one (2 threads: $two)"
        b=$((b + 1))
    done
done
