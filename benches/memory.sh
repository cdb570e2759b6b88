#!/usr/bin/env bash
# Peak memory of `sightline compare` on a long dataset without --smooth: filtering streams, so
# the peak must not grow with the number of rows (goal: < 100 MB at 10⁷ rows).
#
#   bash benches/memory.sh [ROWS] [FILTER...]     # defaults: 10000000, ekf ukf
#
# Simulates ROWS rows of `pendulum`, runs `compare` under `/usr/bin/time -v` (Debian package
# `time`) and prints the peak resident set size, the wall time and the output sizes. Needs about
# 2 GB of free disk per 10⁷ rows and filter; the files are removed afterwards (KEEP=1 keeps them).
set -euo pipefail
cd "$(dirname "$0")/.."
rows=${1:-10000000}
shift || true
filters=("$@")
[ ${#filters[@]} -gt 0 ] || filters=(ekf ukf)
if [ ! -x /usr/bin/time ]; then
    echo "needs /usr/bin/time: apt-get install -y time" >&2
    exit 2
fi
cargo build --release --quiet --bin sightline
bin=target/release/sightline
dir=$(mktemp -d)
[ "${KEEP:-0}" = 1 ] || trap 'rm -rf "$dir"' EXIT
"$bin" simulate pendulum --steps "$rows" --seed 1 -o "$dir/data.csv" >/dev/null
args=()
for f in "${filters[@]}"; do args+=(-f "$f"); done
/usr/bin/time -v "$bin" compare pendulum "$dir/data.csv" "${args[@]}" -o "$dir/out" \
    >"$dir/stdout.txt" 2>"$dir/time.txt" || { cat "$dir/time.txt" >&2; exit 1; }
peak_kb=$(awk -F: '/Maximum resident set size/ {gsub(/ /, "", $2); print $2}' "$dir/time.txt")
wall=$(awk '/Elapsed \(wall clock\)/ {print $NF}' "$dir/time.txt")
echo "rows: $rows   filters: ${filters[*]}"
echo "dataset: $(du -h "$dir/data.csv" | cut -f1)   estimates.csv: $(du -h "$dir/out/estimates.csv" | cut -f1)"
echo "compare peak RSS: $((peak_kb / 1024)) MB ($peak_kb kB)   wall: $wall"
