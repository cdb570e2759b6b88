#!/usr/bin/env bash
# Criterion medians of `benches/filter_step` from two builds, group by group in alternation, so
# that a change in the machine's load hits both sides alike; then the table of ratios.
#
#   (cd OLD && cargo bench --bench filter_step --no-run)   # note the executable it prints
#   cargo bench --bench filter_step --no-run
#   bash benches/interleaved.sh OLD/target/release/deps/filter_step-HASH \
#        target/release/deps/filter_step-HASH /tmp/criterion-pair
#
# Each side saves a criterion baseline (`before`, `after`) under the third argument, which
# becomes CRITERION_HOME; `benches/summarise.py --baselines before after` prints the table.
set -euo pipefail
before=${1:?usage: interleaved.sh BEFORE_BENCH AFTER_BENCH CRITERION_HOME}
after=${2:?usage: interleaved.sh BEFORE_BENCH AFTER_BENCH CRITERION_HOME}
home=${3:?usage: interleaved.sh BEFORE_BENCH AFTER_BENCH CRITERION_HOME}
mkdir -p "$home"
export CRITERION_HOME=$home
groups=(step/pendulum/ step/quadtank/ step/tracking/ step/tankchain-8/ step/tankchain-16/
        step/tankchain-32/ step/tankchain-64/ ekf_jacobians/pendulum/ ekf_jacobians/quadtank/)
for group in "${groups[@]}"; do
    uptime
    "$before" --bench "^$group" --save-baseline before --noplot >/dev/null
    "$after" --bench "^$group" --save-baseline after --noplot >/dev/null
done
python3 "$(dirname "$0")/summarise.py" --criterion "$home" --baselines before after
