#!/usr/bin/env bash
# Side-by-side benchmark: knotwise (release build) and the scripted peer pipeline on the same files.
#
# usage (from the repository root): bench/run.sh [ROWS ...]        default rows: 10000 100000 1000000
# environment:
#   PEER=path/to/peer_statsmodels.py   the peer script (default ../shared/bench/peer_statsmodels.py)
#   PEER_MAX_ROWS=N                    skip the peer above N rows (it needs ~9 min and ~20 GB at 1e6)
#   KNOTWISE_THREADS=T                 threads for knotwise (default: all cores; results do not change)
#   WORK=dir                           data and outputs (default bench/work, git-ignored)
# Prints one table row per size: rows, knotwise s, knotwise peak MB, peer s, peer peak MB, ratio.
set -euo pipefail
cd "$(dirname "$0")/.."
ROOT=$PWD
PEER=${PEER:-../shared/bench/peer_statsmodels.py}
PEER_MAX_ROWS=${PEER_MAX_ROWS:-}
WORK=${WORK:-bench/work}
SIZES=("$@")
[ ${#SIZES[@]} -gt 0 ] || SIZES=(10000 100000 1000000)

command -v /usr/bin/time >/dev/null || { echo "needs /usr/bin/time (GNU time) for peak memory" >&2; exit 2; }
cargo build --release --quiet
BIN=$ROOT/target/release/knotwise
if [ ! -f "$PEER" ]; then
    echo "note: $PEER not found; the peer columns are skipped" >&2
fi

# wall seconds and peak resident MB from a GNU time -v log
measure() {
    awk -F': ' '/Elapsed \(wall clock\)/ { n = split($2, t, ":"); s = 0; for (i = 1; i <= n; i++) s = s * 60 + t[i] }
                /Maximum resident set size/ { kb = $2 }
                END { printf "%.2f %.0f\n", s, kb / 1024 }' "$1"
}

rows_out=()
for n in "${SIZES[@]}"; do
    dir=$WORK/n$n
    mkdir -p "$dir"
    if [ ! -s "$dir/data.csv" ]; then
        python3 bench/gen_data.py "$n" "$dir/data.csv"
    fi
    cp bench/bench.yaml "$dir/bench.yaml"
    rm -rf "$dir/out"
    /usr/bin/time -v "$BIN" run "$dir/bench.yaml" --out "$dir/out" --quiet >"$dir/knotwise.log" 2>"$dir/knotwise.time" || {
        echo "knotwise failed at $n rows; see $dir/knotwise.time" >&2; exit 1; }
    read -r ks km < <(measure "$dir/knotwise.time")
    ps="-"; pm="-"; ratio="-"
    if [ -f "$PEER" ] && { [ -z "$PEER_MAX_ROWS" ] || [ "$n" -le "$PEER_MAX_ROWS" ]; }; then
        if /usr/bin/time -v python3 "$PEER" "$dir/data.csv" >"$dir/peer.log" 2>"$dir/peer.time"; then
            read -r ps pm < <(measure "$dir/peer.time")
            ratio=$(awk -v a="$ps" -v b="$ks" 'BEGIN { printf "%.1f", a / b }')
        else
            echo "peer failed at $n rows; see $dir/peer.time" >&2
        fi
    elif [ -f "$PEER" ]; then
        echo "note: peer skipped at $n rows (PEER_MAX_ROWS=$PEER_MAX_ROWS)" >&2
    fi
    rows_out+=("$(printf '| %9s | %11s | %17s | %7s | %13s | %13s |' "$n" "$ks" "$km" "$ps" "$pm" "$ratio")")
    echo "done: $n rows (knotwise ${ks} s)" >&2
done

echo "| rows      | knotwise s  | knotwise peak MB  | peer s  | peer peak MB  | peer/knotwise |"
echo "|-----------|-------------|-------------------|---------|---------------|---------------|"
printf '%s\n' "${rows_out[@]}"
