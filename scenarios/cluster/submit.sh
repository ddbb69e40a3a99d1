#!/usr/bin/env bash
# Submit a gripsweep study to SLURM as a job array of K shards plus a dependent join job.
#
#   scenarios/cluster/submit.sh [--indices LIST] [--cpus N] SCENARIO K RUN_ROOT
#
#   SCENARIO  scenario file (TOML), on a filesystem the compute nodes see
#   K         number of shards (array tasks); at most the scenario's cell count is useful
#   RUN_ROOT  output folder on a shared filesystem: RUN_ROOT/shard-I-of-K per task,
#             RUN_ROOT/joined for the merged result and report, RUN_ROOT/logs for job logs
#   --indices LIST  which shards to (re)submit, in sbatch --array syntax (default 1-K);
#             e.g. --indices 3 re-runs shard 3 only (it resumes) and queues a fresh join
#   --cpus N  CPUs (and so threads) per shard task (sbatch -c N; default: one)
#
# Environment: GRIPSWEEP_BIN, the gripsweep binary (default: `gripsweep` on PATH); it is
# resolved to an absolute path here and handed to the jobs, so it must sit on a shared
# filesystem. sbatch's own input variables (SBATCH_PARTITION, SBATCH_ACCOUNT,
# SBATCH_TIMELIMIT, ...) apply to both jobs.
#
# Prints `array_job=ID` and `join_job=ID` on stdout, how to watch them on stderr.
set -euo pipefail

here=$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)
usage() {
    sed -n '4,19p' "${BASH_SOURCE[0]}" | sed 's/^# \{0,1\}//' >&2
    exit "${1:-2}"
}

indices=""
cpus=""
while [ "$#" -gt 0 ]; do
    case "$1" in
        --indices) [ "$#" -ge 2 ] || usage; indices=$2; shift 2 ;;
        --cpus) [ "$#" -ge 2 ] || usage; cpus=$2; shift 2 ;;
        -h | --help) usage 0 ;;
        --) shift; break ;;
        -*) echo "submit.sh: unknown option $1" >&2; usage ;;
        *) break ;;
    esac
done
[ "$#" -eq 3 ] || usage
scenario=$1
k=$2
root=$3

case "$k" in '' | *[!0-9]* | 0) echo "submit.sh: K must be a positive integer, got '$k'" >&2; exit 2 ;; esac
if [ -n "$cpus" ]; then
    case "$cpus" in *[!0-9]* | 0) echo "submit.sh: --cpus must be a positive integer, got '$cpus'" >&2; exit 2 ;; esac
fi
[ -n "$indices" ] || indices="1-$k"
if [ ! -f "$scenario" ]; then
    echo "submit.sh: no scenario file at $scenario" >&2
    exit 2
fi
scenario=$(cd "$(dirname "$scenario")" && pwd)/$(basename "$scenario")

bin=${GRIPSWEEP_BIN:-gripsweep}
if ! resolved=$(command -v "$bin"); then
    echo "submit.sh: gripsweep binary '$bin' not found; set GRIPSWEEP_BIN to its path on a shared filesystem" >&2
    exit 2
fi
case "$resolved" in
    /*) bin=$resolved ;;
    *) bin=$(cd "$(dirname "$resolved")" && pwd)/$(basename "$resolved") ;;
esac

for tool in sbatch squeue scontrol; do
    if ! command -v "$tool" >/dev/null; then
        echo "submit.sh: $tool not found: run this on a SLURM login node" >&2
        exit 2
    fi
done

mkdir -p "$root/logs"
root=$(cd "$root" && pwd)

# Tune once (a no-op when RUN_ROOT/gains.csv exists); every shard task reads that table.
tune_opts=(--parsable --job-name=gripsweep-tune
    --output="$root/logs/tune.job-%j.log"
    --export="ALL,GRIPSWEEP_BIN=$bin")
[ -z "$cpus" ] || tune_opts+=(--cpus-per-task="$cpus")
tune_out=$(sbatch "${tune_opts[@]}" "$here/tune.sbatch" "$scenario" "$root")
tune_id=${tune_out%%;*}

array_opts=(--parsable --array="$indices" --job-name=gripsweep-shard
    --dependency="afterok:$tune_id" --kill-on-invalid-dep=yes
    --output="$root/logs/shard-%a.job-%A.log"
    --export="ALL,GRIPSWEEP_BIN=$bin")
[ -z "$cpus" ] || array_opts+=(--cpus-per-task="$cpus")
array_out=$(sbatch "${array_opts[@]}" "$here/shard-array.sbatch" "$scenario" "$k" "$root")
array_id=${array_out%%;*}

join_out=$(sbatch --parsable --job-name=gripsweep-join \
    --dependency="afterok:$array_id" --kill-on-invalid-dep=yes \
    --output="$root/logs/join.job-%j.log" \
    --export="ALL,GRIPSWEEP_BIN=$bin" \
    "$here/join.sbatch" "$k" "$root")
join_id=${join_out%%;*}

echo "tune_job=$tune_id"
echo "array_job=$array_id"
echo "join_job=$join_id"
cat >&2 <<EOF
submit.sh: shards $indices of $k of $(basename "$scenario") as array job $array_id; join as job $join_id
  (runs when every task of $array_id has succeeded; cancelled by SLURM if one fails)
  watch:    squeue -j $array_id,$join_id      scontrol show job $array_id
  logs:     $root/logs/
  result:   $root/joined/ (cells.csv, summary.md)
  re-run shard I (it resumes), then join again:
            $here/submit.sh --indices I $scenario $k $root
EOF
