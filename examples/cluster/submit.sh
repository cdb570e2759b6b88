#!/usr/bin/env bash
# Submits a sharded Sightline Monte Carlo campaign to Slurm: a job array of SHARDS tasks
# (montecarlo-array.sbatch) and a merge job (merge.sbatch) that runs once they all succeeded.
#
#   SIGHTLINE=$(command -v sightline) MODEL=cv RUNS=1000 STEPS=300 SHARDS=8 \
#   FILTERS="kf ukf" SEED=1 OUT=$PWD/mc  examples/cluster/submit.sh
#
# Parameters: the environment variables of montecarlo-array.sbatch (OUT must be a directory
# every node sees). Options:
#   --tasks LIST   submit only these tasks of the array (Slurm syntax: 3 or 2,5 or 1-4), e.g.
#                  to resubmit a task that was cancelled or failed: it resumes from its
#                  checkpoint, and a new merge job waits for it and for every job of this
#                  campaign still queued or running.
#   -- ARGS...     more sbatch options for both jobs (e.g. -- --partition=long --time=2:00:00)
#
# Prints two lines: `array job: ID` and `merge job: ID`.
set -euo pipefail
here=$(cd "$(dirname "$0")" && pwd)

: "${SHARDS:?set SHARDS}" "${OUT:?set OUT}"
tasks="1-$SHARDS"
extra=()
while [ $# -gt 0 ]; do
    case "$1" in
    --tasks) tasks=${2:?--tasks needs a list}; shift ;;
    --) shift; extra=("$@"); break ;;
    *) echo "submit.sh: unknown argument '$1'" >&2; exit 2 ;;
    esac
    shift
done

mkdir -p "$OUT/logs"
# One job name per campaign directory, so that a resubmission can find the jobs still active.
name="sightline-mc-$(basename "$OUT")"
active=$(squeue -h --name="$name" -o '%A' 2>/dev/null | sort -u | tr '\n' ' ')

array=$(sbatch --parsable --export=ALL --job-name="$name" --array="$tasks" \
    --output="$OUT/logs/task-%a.log" "${extra[@]}" "$here/montecarlo-array.sbatch")
array=${array%%;*}

# The merge waits for the new tasks to succeed and for the campaign's other jobs to end; if a
# task fails or is cancelled, Slurm drops this merge job (resubmit the task with --tasks).
dependency="afterok:$array"
for id in $active; do dependency="$dependency,afterany:$id"; done
merge=$(sbatch --parsable --export=ALL --job-name="$name" --dependency="$dependency" \
    --kill-on-invalid-dep=yes --output="$OUT/logs/merge.log" "${extra[@]}" \
    "$here/merge.sbatch")
merge=${merge%%;*}

echo "array job: $array"
echo "merge job: $merge"
